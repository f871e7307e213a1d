/*
 * The summary of a batch (`scan`, `listen`): summary.csv (libcsv),
 * summary.json (json-c) and index.html (libxml2), one row per plan or file,
 * attention first. Like every writer it computes nothing: the entries come
 * sorted and judged from the scan module. All three name the model and the
 * action levels and carry the screening caution, as every report does (the
 * CSV on every row, which is read on its own).
 */
#include <csv.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "estimate_common.h"
#include "html.h"
#include "jsonw.h"
#include "strayline/scan.h"
#include "strayline/util.h"
#include "strayline/version.h"

static const char caution[] =
    "Screening estimates only: each value comes from a peripheral-dose model of limited "
    "range (see each report for its limits). Confirm high values by measurement, follow "
    "local protocols and consult a qualified medical physicist.";

static const char *s_or(const char *s, const char *dflt)
{
    return s ? s : dflt;
}

/* The flagged organs of a plan in one line, allocated (every organ,
 * however many); NULL when out of memory. */
static char *organs_text(const sl_batch_entry *e)
{
    sl_buf b = {0};
    sl_buf_printf(&b, "%s", "");
    for (size_t i = 0; i < e->nflagged; i++) {
        const sl_flagged_organ *o = &e->organs[i];
        /* fixed decimals, no exponent, as every report a person reads */
        char cv[32], uv[32];
        est_num(o->course_cgy, cv, sizeof cv);
        est_num(o->upper_cgy, uv, sizeof uv);
        if (isfinite(o->course_cgy))
            sl_buf_printf(&b, "%s%s: %s (course %s cGy, upper %s cGy)", i ? "; " : "", o->roi,
                          o->status, cv, uv);
        else
            sl_buf_printf(&b, "%s%s: %s", i ? "; " : "", o->roi, o->status);
    }
    if (b.failed || !b.data) {
        sl_buf_free(&b);
        return NULL;
    }
    return b.data;
}

static void csv_field(FILE *fp, const char *s, bool last)
{
    csv_fwrite(fp, s ? s : "", s ? strlen(s) : 0);
    fputc(last ? '\n' : ',', fp);
}

/* Every row of the CSV carries the model and the caution: a row is read
 * on its own (a spreadsheet filtered to one plan). */
static sl_status write_csv(FILE *fp, const sl_batch_config *cfg, const sl_batch_entry *e,
                           size_t n)
{
    char why[600];
    snprintf(why, sizeof why, "%s%s", caution,
             cfg->model->machine.invented ? " The model is invented demo data, not for clinical "
                                            "use."
                                          : "");
    static const char *const head[] = {"outcome", "flagged", "worst_status", "patient_id",
                                       "plan_label", "plan_uid", "structure_set_uid",
                                       "electron_beams", "organs_flagged", "flagged_organs",
                                       "organs_not_judged", "report_json", "report_html", "report_pdf", "plan_file",
                                       "structure_set_file", "planning_system_dose",
                                       "message", "model_file", "model_version", "model_sha256",
                                       "action_levels_file", "caution"};
    size_t nh = sizeof head / sizeof *head;
    for (size_t i = 0; i < nh; i++)
        csv_field(fp, head[i], i + 1 == nh);
    char beams[32], nf[32];
    for (size_t i = 0; i < n; i++) {
        const sl_batch_entry *x = &e[i];
        bool screened = x->outcome == SL_OUT_SCREENED;
        snprintf(beams, sizeof beams, "%zu", x->nbeams);
        snprintf(nf, sizeof nf, "%zu", x->nflagged);
        char *organs = organs_text(x);
        if (!organs)
            return SL_ENOMEM;
        csv_field(fp, sl_outcome_name(x->outcome), false);
        csv_field(fp, x->flagged ? "yes" : "no", false);
        csv_field(fp, x->worst_status, false);
        csv_field(fp, x->patient_id, false);
        csv_field(fp, x->plan_label, false);
        csv_field(fp, x->plan_uid, false);
        csv_field(fp, x->ss_uid, false);
        csv_field(fp, screened ? beams : "", false);
        csv_field(fp, screened ? nf : "", false);
        csv_field(fp, organs, false);
        free(organs);
        csv_field(fp, x->unjudged, false);
        csv_field(fp, x->report_json, false);
        csv_field(fp, x->report_html, false);
        csv_field(fp, x->report_pdf, false);
        csv_field(fp, x->plan_path, false);
        csv_field(fp, x->ss_path, false);
        csv_field(fp, x->tps_note, false);
        csv_field(fp, x->message, false);
        csv_field(fp, cfg->model_path, false);
        csv_field(fp, cfg->model->model_version, false);
        csv_field(fp, cfg->model->sha256, false);
        csv_field(fp, cfg->levels_path, false);
        csv_field(fp, why, true);
    }
    return ferror(fp) ? SL_EIO : SL_OK;
}

static sl_status write_json(FILE *fp, const sl_batch_config *cfg, const sl_batch_entry *e,
                            size_t n, sl_error *err)
{
    jw w = {err, SL_OK};
    json_object *root = json_object_new_object();
    if (!root)
        return sl_error_set(err, SL_ENOMEM, "out of memory writing JSON");
    jw_str(&w, root, "tool", "strayline");
    jw_str(&w, root, "tool_version", sl_version());
    jw_str(&w, root, "caution", caution);
    jw_str(&w, root, "model_file", cfg->model_path);
    jw_str(&w, root, "model_version", cfg->model->model_version);
    jw_str(&w, root, "model_sha256", cfg->model->sha256);
    jw_int(&w, root, "model_invivo_scales", (long long)cfg->model->nscales);
    jw_str(&w, root, "action_levels_file", cfg->levels_path);
    jw_str(&w, root, "action_levels_sha256", cfg->levels->sha256);
    size_t counts[SL_OUT_BAD + 1] = {0}, flagged = 0;
    for (size_t i = 0; i < n; i++) {
        counts[e[i].outcome]++;
        flagged += e[i].flagged;
    }
    json_object *c = json_object_new_object();
    jw_put(&w, root, "counts", c);
    for (int o = 0; o <= SL_OUT_BAD; o++)
        jw_int(&w, c, sl_outcome_name((sl_outcome)o), (long long)counts[o]);
    jw_int(&w, c, "flagged", (long long)flagged);
    /* facts entries that named no plan: their patients' plans, if any,
     * were screened without those facts */
    json_object *fu = json_object_new_array();
    jw_put(&w, root, "facts_entries_matching_no_plan", fu);
    for (size_t k = 0; k < cfg->nfacts_unmatched; k++)
        jw_append(&w, fu, json_object_new_string(cfg->facts_unmatched[k]));
    json_object *arr = json_object_new_array();
    jw_put(&w, root, "plans", arr);
    for (size_t i = 0; i < n; i++) {
        const sl_batch_entry *x = &e[i];
        json_object *p = json_object_new_object();
        jw_append(&w, arr, p);
        if (!p)
            break;
        jw_str(&w, p, "outcome", sl_outcome_name(x->outcome));
        jw_bool(&w, p, "flagged", x->flagged);
        jw_str(&w, p, "worst_status", x->worst_status);
        jw_str(&w, p, "patient_id", x->patient_id);
        jw_str(&w, p, "plan_label", x->plan_label);
        jw_str(&w, p, "plan_uid", x->plan_uid);
        jw_str(&w, p, "structure_set_uid", x->ss_uid);
        jw_str(&w, p, "plan_file", x->plan_path);
        jw_str(&w, p, "structure_set_file", x->ss_path);
        if (x->outcome == SL_OUT_SCREENED)
            jw_int(&w, p, "electron_beams", (long long)x->nbeams);
        /* organs with levels this screening could not judge: not clear */
        jw_str(&w, p, "organs_not_judged", x->unjudged);
        json_object *orgs = json_object_new_array();
        jw_put(&w, p, "flagged_organs", orgs);
        for (size_t k = 0; k < x->nflagged; k++) {
            const sl_flagged_organ *o = &x->organs[k];
            json_object *g = json_object_new_object();
            jw_append(&w, orgs, g);
            if (!g)
                break;
            jw_str(&w, g, "roi", o->roi);
            jw_str(&w, g, "kind", o->kind);
            jw_str(&w, g, "status", o->status);
            jw_num_opt(&w, g, "judged_course_max_cgy", o->course_cgy);
            jw_num_opt(&w, g, "judged_course_max_upper_cgy", o->upper_cgy);
            jw_str(&w, g, "level", o->level);
            jw_num_opt(&w, g, "level_gy", o->level_gy);
        }
        jw_str(&w, p, "report_json", x->report_json);
        jw_str(&w, p, "report_html", x->report_html);
        jw_str(&w, p, "report_pdf", x->report_pdf);
        json_object *td = json_object_new_array();
        jw_put(&w, p, "planning_system_dose_files", td);
        for (size_t k = 0; k < x->ntps; k++)
            jw_append(&w, td, json_object_new_string(x->tps_paths[k]));
        jw_str(&w, p, "planning_system_dose", x->tps_note);
        jw_str(&w, p, "message", x->message);
    }
    return jw_write(&w, root, fp);
}

static sl_status write_html(FILE *fp, const sl_batch_config *cfg, const sl_batch_entry *e,
                            size_t n, sl_error *err)
{
    hdoc h;
    if (!hdoc_new(&h, "strayline: screening summary", sl_report_css))
        return sl_error_set(err, SL_ENOMEM, "out of memory building the HTML summary");
    xmlNodePtr b = h.body;
    hel(&h, b, "h1", "Out-of-field dose screening: summary");
    xmlNodePtr cd = hel(&h, b, "div", NULL);
    hattr(&h, cd, "class", "caution");
    hel(&h, cd, "p", caution);
    if (cfg->model->machine.invented)
        hel(&h, cd, "p", "The model is invented demo data, not for clinical use.");
    if (cfg->model->nscales)
        helf(&h, cd, "p",
             "MODEL SCALED BY IN-VIVO EVIDENCE: %zu energy and applicator pair%s of this model "
             "%s scaled by in-vivo readings; each report names the beams it touches.",
             cfg->model->nscales, cfg->model->nscales == 1 ? "" : "s",
             cfg->model->nscales == 1 ? "is" : "are");
    if (cfg->nfacts_unmatched) {
        sl_buf keys = {0};
        for (size_t k = 0; k < cfg->nfacts_unmatched; k++)
            sl_buf_printf(&keys, "%s'%s'", k ? ", " : "", cfg->facts_unmatched[k]);
        helf(&h, cd, "p",
             "FACTS NOT USED: %zu entr%s of the facts file %s named no plan of this folder "
             "(%s): a patient's plan, if here under another ID, was screened without them; "
             "check the keys.",
             cfg->nfacts_unmatched, cfg->nfacts_unmatched == 1 ? "y" : "ies",
             cfg->facts ? s_or(cfg->facts->source, "") : "",
             keys.failed ? "" : s_or(keys.data, ""));
        sl_buf_free(&keys);
    }
    xmlNodePtr meta = hel(&h, b, "table", NULL);
    const char *const rows[][2] = {{"model", cfg->model_path},
                                   {"model version", cfg->model->model_version},
                                   {"model SHA-256", cfg->model->sha256},
                                   {"action levels", cfg->levels_path},
                                   {"action levels SHA-256", cfg->levels->sha256},
                                   {"tool", sl_version()}};
    for (size_t i = 0; i < sizeof rows / sizeof *rows; i++) {
        const char *cells[] = {rows[i][0], s_or(rows[i][1], "unknown")};
        xmlNodePtr tr = hel(&h, meta, "tr", NULL);
        hel(&h, tr, "th", cells[0]);
        hel(&h, tr, "td", cells[1]);
    }
    xmlNodePtr t = hel(&h, b, "table", NULL);
    static const char *const head[] = {"verdict", "worst status", "patient ID", "plan",
                                       "electron beams", "flagged organs", "reports", "note"};
    hrow(&h, t, true, head, sizeof head / sizeof *head);
    char beams[32];
    for (size_t i = 0; i < n; i++) {
        const sl_batch_entry *x = &e[i];
        xmlNodePtr tr = hel(&h, t, "tr", NULL);
        const char *verdict = x->outcome == SL_OUT_SCREENED
                                  ? (x->flagged    ? "FLAGGED"
                                     : x->unjudged ? "NOT JUDGED: see the report"
                                                   : "no organ flagged")
                                  : sl_outcome_name(x->outcome);
        xmlNodePtr v = hel(&h, tr, "td", verdict);
        if (x->flagged)
            hattr(&h, v, "class", "status-exceeds");
        else if (x->outcome == SL_OUT_SCREENED && x->unjudged)
            hattr(&h, v, "class", "status-may");
        hel(&h, tr, "td", s_or(x->worst_status, ""));
        hel(&h, tr, "td", s_or(x->patient_id, ""));
        hel(&h, tr, "td", s_or(x->plan_label, s_or(x->plan_path, "")));
        snprintf(beams, sizeof beams, "%zu", x->nbeams);
        hattr(&h, hel(&h, tr, "td", x->outcome == SL_OUT_SCREENED ? beams : ""), "class", "n");
        if (!x->nflagged && x->unjudged) {
            xmlNodePtr td = hel(&h, tr, "td", "not judged: ");
            htext(&h, td, x->unjudged);
        } else {
            char *organs = organs_text(x);
            hel(&h, tr, "td", organs ? organs : "(out of memory listing the organs)");
            free(organs);
        }
        xmlNodePtr rc = hel(&h, tr, "td", NULL);
        if (x->report_html) {
            xmlNodePtr a = hel(&h, rc, "a", "HTML");
            hattr(&h, a, "href", x->report_html);
            htext(&h, rc, " ");
        }
        if (x->report_pdf) {
            xmlNodePtr a = hel(&h, rc, "a", "PDF");
            hattr(&h, a, "href", x->report_pdf);
            htext(&h, rc, " ");
        }
        if (x->report_json) {
            xmlNodePtr a = hel(&h, rc, "a", "JSON");
            hattr(&h, a, "href", x->report_json);
        }
        xmlNodePtr nt = hel(&h, tr, "td", s_or(x->message, ""));
        if (x->tps_note) {
            if (x->message)
                hel(&h, nt, "br", NULL);
            htext(&h, nt, x->tps_note);
        }
    }
    return hdoc_write(&h, fp, err);
}

sl_status sl_batch_write_summary(const sl_batch_config *cfg, const sl_batch_entry *e, size_t n,
                                 sl_error *err)
{
    static const char *const names[] = {"summary.csv", "summary.json", "index.html"};
    for (int k = 0; k < 3; k++) {
        size_t len = strlen(cfg->outdir) + strlen(names[k]) + 2;
        char *path = malloc(len);
        if (!path)
            return sl_error_set(err, SL_ENOMEM, "out of memory");
        snprintf(path, len, "%s/%s", cfg->outdir, names[k]);
        const char *inputs[] = {cfg->model_path, cfg->levels_path};
        sl_outfile out = {0};
        sl_status st = sl_outfile_open(&out, path, inputs, 2, err);
        if (st == SL_OK) {
            st = k == 0   ? write_csv(out.fp, cfg, e, n)
                 : k == 1 ? write_json(out.fp, cfg, e, n, err)
                          : write_html(out.fp, cfg, e, n, err);
            if (st == SL_EIO && k == 0)
                sl_error_set(err, SL_EIO, "%s: cannot write", path);
            else if (st == SL_ENOMEM && k == 0)
                sl_error_set(err, SL_ENOMEM, "%s: out of memory", path);
        }
        if (st == SL_OK)
            st = sl_outfile_commit(&out, err);
        else
            sl_outfile_abort(&out);
        free(path);
        if (st != SL_OK)
            return st;
    }
    return SL_OK;
}
