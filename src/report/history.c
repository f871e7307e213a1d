/*
 * `strayline history`: the screenings of the log as a text table, JSON
 * (json-c) or CSV (libcsv), oldest first, each with its flagged organs.
 * Doses are course doses in cGy and levels in Gy, as the keys say.
 */
#include <csv.h>
#include <math.h>
#include <stdio.h>
#include <string.h>

#include "estimate_common.h"
#include "jsonw.h"
#include "strayline/report.h"
#include "strayline/screenlog.h"
#include "strayline/util.h"

/* The log holds screening estimates: every listing says so. */
static const char caution[] =
    "Screening estimates only: each dose comes from a peripheral-dose model of limited range "
    "(see each report for its model and limits). Confirm high values by measurement, follow "
    "local protocols and consult a qualified medical physicist.";

static const char *s_or(const char *s, const char *d)
{
    return s ? s : d;
}

static sl_status text(FILE *fp, const sl_history *h)
{
    char a[256], b[256], c[256], d[256];
    fprintf(fp, "%-20s  %-8s  %-7s  %-16s  %-16s  %s\n", "screened (UTC)", "outcome", "flagged",
            "patient ID", "plan", "worst status / model version");
    for (size_t i = 0; i < h->n; i++) {
        const sl_history_row *r = &h->rows[i];
        fprintf(fp, "%-20s  %-8s  %-7s  %-16s  %-16s  %s / model %s\n", r->screened_at,
                r->outcome, r->flagged ? "yes" : "no",
                sl_text_escape(s_or(r->patient_id, "-"), a, sizeof a),
                sl_text_escape(s_or(r->plan_label, "-"), b, sizeof b),
                sl_text_escape(s_or(r->worst_status, s_or(r->message, "-")), c, sizeof c),
                sl_text_escape(s_or(r->model_version, "unknown"), d, sizeof d));
        for (size_t k = 0; k < r->norgans; k++) {
            const sl_history_organ *o = &r->organs[k];
            fprintf(fp, "    %s: %s", sl_text_escape(o->roi, a, sizeof a),
                    sl_text_escape(s_or(o->status, ""), b, sizeof b));
            if (isfinite(o->course_cgy)) {
                /* fixed decimals, no exponent, as every report a person reads */
                char cv[32], uv[32];
                est_num(o->course_cgy, cv, sizeof cv);
                est_num(o->upper_cgy, uv, sizeof uv);
                fprintf(fp, "; course %s cGy, upper bound %s cGy", cv, uv);
            }
            if (o->level)
                fprintf(fp, "; level %s", sl_text_escape(o->level, c, sizeof c));
            if (isfinite(o->level_gy))
                fprintf(fp, " (%.4g Gy)", o->level_gy);
            fputc('\n', fp);
        }
        if (r->organs_not_judged)
            fprintf(fp, "    NOT JUDGED (organs with action levels, or of no known kind): %s\n",
                    sl_text_escape(r->organs_not_judged, a, sizeof a));
        if (r->outcome && strcmp(r->outcome, "screened") != 0 && r->message)
            fprintf(fp, "    %s\n", sl_text_escape(r->message, a, sizeof a));
    }
    fprintf(fp, "%zu screening%s\n%s\n", h->n, h->n == 1 ? "" : "s", caution);
    return ferror(fp) ? SL_EIO : SL_OK;
}

static void csv_field(FILE *fp, const char *s, bool last)
{
    csv_fwrite(fp, s ? s : "", s ? strlen(s) : 0);
    fputc(last ? '\n' : ',', fp);
}

static void csv_num(FILE *fp, double v, bool last)
{
    char buf[32] = "";
    if (isfinite(v))
        snprintf(buf, sizeof buf, "%.6g", v);
    csv_field(fp, buf, last);
}

/* One line per flagged organ (and one for a screening without any). */
static sl_status csv(FILE *fp, const sl_history *h)
{
    static const char *const head[] = {
        "id", "screened_at_utc", "command", "outcome", "flagged", "worst_status", "patient_id",
        "plan_label", "plan_uid", "structure_set_uid", "model_file", "model_version",
        "model_sha256", "levels_file", "levels_sha256", "tool_version", "options", "roi",
        "organ_status", "judged_course_max_cgy", "judged_course_max_upper_cgy", "level",
        "level_gy", "report_json", "report_html", "report_pdf", "message", "organs_not_judged",
        "caution"};
    size_t nh = sizeof head / sizeof *head;
    for (size_t i = 0; i < nh; i++)
        csv_field(fp, head[i], i + 1 == nh);
    char id[32];
    for (size_t i = 0; i < h->n; i++) {
        const sl_history_row *r = &h->rows[i];
        for (size_t k = 0; k < (r->norgans ? r->norgans : 1); k++) {
            const sl_history_organ *o = r->norgans ? &r->organs[k] : NULL;
            snprintf(id, sizeof id, "%lld", r->id);
            const char *v[] = {id,           r->screened_at,  r->command,     r->outcome,
                               r->flagged ? "yes" : "no",     r->worst_status, r->patient_id,
                               r->plan_label, r->plan_uid,    r->structure_set_uid,
                               r->model_file, r->model_version, r->model_sha256,
                               r->levels_file, r->levels_sha256, r->tool_version, r->options,
                               o ? o->roi : NULL, o ? o->status : NULL};
            for (size_t j = 0; j < sizeof v / sizeof *v; j++)
                csv_field(fp, v[j], false);
            csv_num(fp, o ? o->course_cgy : NAN, false);
            csv_num(fp, o ? o->upper_cgy : NAN, false);
            csv_field(fp, o ? o->level : NULL, false);
            csv_num(fp, o ? o->level_gy : NAN, false);
            csv_field(fp, r->report_json, false);
            csv_field(fp, r->report_html, false);
            csv_field(fp, r->report_pdf, false);
            csv_field(fp, r->message, false);
            csv_field(fp, r->organs_not_judged, false);
            csv_field(fp, caution, true);
        }
    }
    return ferror(fp) ? SL_EIO : SL_OK;
}

static sl_status json(FILE *fp, const sl_history *h, sl_error *err)
{
    jw w = {err, SL_OK};
    json_object *root = json_object_new_object();
    if (!root)
        return sl_error_set(err, SL_ENOMEM, "out of memory writing JSON");
    jw_str(&w, root, "caution", caution);
    json_object *arr = json_object_new_array();
    jw_put(&w, root, "screenings", arr);
    for (size_t i = 0; i < h->n && arr; i++) {
        const sl_history_row *r = &h->rows[i];
        json_object *o = json_object_new_object();
        jw_append(&w, arr, o);
        if (!o)
            break;
        jw_int(&w, o, "id", r->id);
        jw_str(&w, o, "screened_at_utc", r->screened_at);
        jw_str(&w, o, "command", r->command);
        jw_str(&w, o, "outcome", r->outcome);
        jw_bool(&w, o, "flagged", r->flagged);
        jw_str(&w, o, "worst_status", r->worst_status);
        jw_str(&w, o, "patient_id", r->patient_id);
        jw_str(&w, o, "plan_label", r->plan_label);
        jw_str(&w, o, "plan_uid", r->plan_uid);
        jw_str(&w, o, "structure_set_uid", r->structure_set_uid);
        jw_str(&w, o, "tool_version", r->tool_version);
        jw_str(&w, o, "model_file", r->model_file);
        jw_str(&w, o, "model_machine", r->model_machine);
        jw_str(&w, o, "model_version", r->model_version);
        jw_str(&w, o, "model_sha256", r->model_sha256);
        jw_str(&w, o, "levels_file", r->levels_file);
        jw_str(&w, o, "levels_sha256", r->levels_sha256);
        jw_str(&w, o, "options", r->options);
        jw_str(&w, o, "message", r->message);
        jw_str(&w, o, "report_json", r->report_json);
        jw_str(&w, o, "report_html", r->report_html);
        jw_str(&w, o, "report_pdf", r->report_pdf);
        jw_str(&w, o, "organs_not_judged", r->organs_not_judged);
        json_object *orgs = json_object_new_array();
        jw_put(&w, o, "flagged_organs", orgs);
        for (size_t k = 0; k < r->norgans && orgs; k++) {
            const sl_history_organ *g = &r->organs[k];
            json_object *x = json_object_new_object();
            jw_append(&w, orgs, x);
            if (!x)
                break;
            jw_str(&w, x, "roi", g->roi);
            jw_str(&w, x, "kind", g->kind);
            jw_str(&w, x, "status", g->status);
            jw_num_opt(&w, x, "judged_course_max_cgy", g->course_cgy);
            jw_num_opt(&w, x, "judged_course_max_upper_cgy", g->upper_cgy);
            jw_str(&w, x, "level", g->level);
            jw_num_opt(&w, x, "level_gy", g->level_gy);
        }
    }
    return jw_write(&w, root, fp);
}

sl_status sl_report_history(FILE *fp, sl_format fmt, const sl_history *h, sl_error *err)
{
    sl_status st = fmt == SL_FORMAT_JSON  ? json(fp, h, err)
                   : fmt == SL_FORMAT_CSV ? csv(fp, h)
                                          : text(fp, h);
    if (st == SL_EIO && err && !err->msg[0])
        sl_error_set(err, SL_EIO, "cannot write the history");
    return st;
}
