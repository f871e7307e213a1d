/*
 * One screening of a batch (`scan` or `listen`): read the pair (and the
 * planning system's RT Doses the pairing found for the plan, each checked
 * against it before use), screen it, write its JSON and HTML reports into
 * the output folder, log it, and keep what the summary needs (worst status,
 * flagged organs, report names, what became of the RT Doses).
 *
 * A bad plan must never stop a batch, so an input error becomes the entry's
 * outcome and message; only what concerns every plan (the log cannot be
 * written, memory) comes back as a status. Report names are built from
 * sanitised identifiers and always end in the plan's SOP Instance UID,
 * checked against the UID grammar, so two plans never share a name and no
 * identifier from a file can reach outside the output folder.
 */
#include <errno.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#include <libxml/parser.h>

#include "strayline/dicom.h"
#include "strayline/report.h"
#include "strayline/rtdose.h"
#include "strayline/scan.h"
#include "strayline/screen.h"
#include "strayline/util.h"
#include "strayline/version.h"

void sl_batch_prepare(void)
{
    xmlInitParser();
}

void sl_sanitise_name(const char *in, char *out, size_t max)
{
    size_t k = 0;
    for (size_t i = 0; in && in[i] && k + 1 < max; i++) {
        unsigned char c = (unsigned char)in[i];
        bool keep = (c >= 'A' && c <= 'Z') || (c >= 'a' && c <= 'z') || (c >= '0' && c <= '9') ||
                    c == '-' || c == '_' || (c == '.' && k > 0);
        out[k++] = keep ? (char)c : '_';
    }
    out[k] = '\0';
}

/* Sort key of a screened plan's organ: the worse, the higher. Unflagged,
 * an organ with levels left unjudged ranks above one judged below its
 * level, and that above an organ without levels (a target, say), so that
 * a plan's worst status names what a reader must look at. */
static int organ_rank(const sl_assessment *a)
{
    if (!a->flagged && a->measurement_advised)
        return 8; /* the plan is flagged for it: a measurement */
    if (!a->flagged) {
        if (a->unjudged)
            return 2;
        return a->governing || a->status == SL_ST_BAND ? 1 : 0;
    }
    switch (a->status) {
    case SL_ST_EXCEEDS: return 11;
    case SL_ST_MAY_EXCEED: return 10;
    case SL_ST_BAND: return 9;
    default: return 8;
    }
}

/* Plans by rank: flagged (8 to 11, by their worst organ), then these. A
 * plan with an organ left unjudged is not listed among the clear ones. */
enum { RANK_FLAGGED = 8, RANK_ERROR = 7, RANK_INCOMPLETE = 6, RANK_BAD = 5, RANK_NOT_JUDGED = 4,
       RANK_CLEAR = 3, RANK_SKIPPED = 2, RANK_OTHER = 1 };

static char *xstrdup(const char *s, bool *ok)
{
    if (!s)
        return NULL;
    char *c = strdup(s);
    if (!c)
        *ok = false;
    return c;
}

static void status_of(const sl_assessment *a, char *buf, size_t size)
{
    if (a->status == SL_ST_BAND && a->kind && a->band >= 0 && (size_t)a->band < a->kind->nbands) {
        if (a->band_upper > a->band && (size_t)a->band_upper < a->kind->nbands)
            snprintf(buf, size, "%s risk band (upper bound: %s)", a->kind->bands[a->band].name,
                     a->kind->bands[a->band_upper].name);
        else
            snprintf(buf, size, "%s risk band", a->kind->bands[a->band].name);
    }
    else if (a->kind_unknown && a->not_assessed_why == sl_kind_unknown_why)
        snprintf(buf, size, "not judged: %s", a->not_assessed_why);
    else if (a->kind_unknown)
        snprintf(buf, size, "not judged: no kind matches its name (%s)",
                 a->status == SL_ST_IN_FIELD ? "in or touching the field"
                 : a->not_assessed_why       ? a->not_assessed_why
                                             : "not assessed");
    else if (a->status == SL_ST_NOT_ASSESSED && a->not_assessed_why)
        snprintf(buf, size, "%s: %s", sl_status_text(a->status), a->not_assessed_why);
    else if (a->incomplete)
        snprintf(buf, size, "%s (incomplete: other beams not included)",
                 sl_status_text(a->status));
    else if (a->measurement_advised && !a->flagged)
        snprintf(buf, size, "%s, measurement advised", sl_status_text(a->status));
    else
        snprintf(buf, size, "%s", sl_status_text(a->status));
}

/* The flagged organs (those advised a measurement too: they flag the plan)
 * and the plan's worst status, for summary and log. */
static bool collect(const sl_assessments *as, sl_batch_entry *e)
{
    bool ok = true;
    e->organs = calloc(as->n ? as->n : 1, sizeof *e->organs);
    if (!e->organs)
        return false;
    int worst = -1;
    char buf[768];
    for (size_t i = 0; i < as->n; i++) {
        const sl_assessment *a = &as->items[i];
        int r = organ_rank(a);
        if (r > worst) {
            worst = r;
            status_of(a, buf, sizeof buf);
            free(e->worst_status);
            e->worst_status = xstrdup(buf, &ok);
        }
        if (a->unjudged) {
            /* named in the summary: not judged is not clear; a flagged one
             * too, so that the column holds what the report's
             * organs_not_judged counts */
            size_t had = e->unjudged ? strlen(e->unjudged) : 0, add = strlen(a->dose->roi->name);
            char *u = realloc(e->unjudged, had + add + 3);
            if (!u) {
                ok = false;
            } else {
                snprintf(u + had, add + 3, "%s%s", had ? ", " : "", a->dose->roi->name);
                e->unjudged = u;
            }
        }
        if (!a->flagged && !a->measurement_advised)
            continue;
        sl_flagged_organ *o = &e->organs[e->nflagged++];
        const sl_organ_dose *d = a->dose;
        o->roi = xstrdup(d->roi->name, &ok);
        o->kind = xstrdup(a->kind ? a->kind->kind : NULL, &ok);
        status_of(a, buf, sizeof buf);
        o->status = xstrdup(buf, &ok);
        o->course_cgy = d->estimated ? d->course_max.cgy + a->other_cgy : NAN;
        o->upper_cgy = d->estimated ? d->course_max.upper_cgy + a->other_cgy : NAN;
        o->level_gy = NAN;
        if (a->governing) {
            o->level = xstrdup(a->governing->name, &ok);
            o->level_gy = a->governing->dose_gy;
        } else if (a->status == SL_ST_BAND && a->kind && a->band >= 0) {
            snprintf(buf, sizeof buf, "risk bands (%s)", a->kind->bands_source ? a->kind->bands_source : "");
            o->level = xstrdup(buf, &ok);
        } else if (a->unjudged_level_gy > 0) {
            /* not judged, its value reaching this level: the reports' */
            o->level = xstrdup(a->kind_unknown ? "the table's lowest level" : "its lowest level",
                               &ok);
            o->level_gy = a->unjudged_level_gy;
        }
    }
    for (size_t i = 0; i < as->n && !e->message; i++) {
        const sl_assessment *a = &as->items[i];
        if (a->kind && strcmp(a->kind->kind, "fetus") == 0 && a->status == SL_ST_NOT_ASSESSED &&
            a->not_assessed_why && strncmp(a->not_assessed_why, "no gestational age", 18) == 0) {
            /* the batch was not given a fact it needs: say what to supply */
            snprintf(buf, sizeof buf,
                     "ROI '%s' is a fetus and no gestational age was given: it is not judged; "
                     "supply gestational_age_weeks for patient ID '%s' (or plan UID %s) in the "
                     "facts file (--facts)",
                     a->dose->roi->name, e->patient_id ? e->patient_id : "", e->plan_uid);
            e->message = xstrdup(buf, &ok);
        }
    }
    for (size_t i = 0; i < as->n && !e->message; i++) {
        const sl_assessment *a = &as->items[i];
        /* a device judged as for a pacing-dependent patient because nobody
         * said: the fact to supply, as for a fetus's age (found by an
         * independent review) */
        if (a->pacing_assumed && a->flagged) {
            snprintf(buf, sizeof buf,
                     "ROI '%s' is a cardiac device and pacing dependence was not given: it is "
                     "judged as for a pacing-dependent patient (the higher band); supply "
                     "pacing_dependent for patient ID '%s' (or plan UID %s) in the facts file "
                     "(--facts)",
                     a->dose->roi->name, e->patient_id ? e->patient_id : "", e->plan_uid);
            e->message = xstrdup(buf, &ok);
        }
    }
    if (as->any_flagged && e->nflagged == 0) {
        /* flagged for something asked for and absent (a fetus, a device) */
        free(e->worst_status);
        e->worst_status = xstrdup(as->missing.count ? as->missing.items[0] : "flagged", &ok);
        worst = RANK_FLAGGED;
    }
    if (!e->worst_status) {
        e->worst_status = xstrdup("no organ estimated", &ok);
    } else if (worst == 0) {
        /* targets and organs without levels only: their statuses say
         * nothing about the plan */
        free(e->worst_status);
        e->worst_status = xstrdup("no organ with action levels", &ok);
    }
    e->flagged = as->any_flagged;
    e->rank = as->any_flagged ? (worst >= RANK_FLAGGED ? worst : RANK_FLAGGED)
              : e->unjudged  ? RANK_NOT_JUDGED
                             : RANK_CLEAR;
    return ok;
}

enum { REP_JSON, REP_HTML, REP_PDF };

/* Write one report atomically into the output folder. */
static sl_status write_report(const sl_batch_config *cfg, const char *name, int kind,
                              const sl_estimate_report *rep, const char *plan_path,
                              const char *ss_path, sl_error *err)
{
    size_t n = strlen(cfg->outdir) + strlen(name) + 2;
    char *path = malloc(n);
    if (!path)
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    snprintf(path, n, "%s/%s", cfg->outdir, name);
    const char *inputs[] = {plan_path, ss_path, cfg->model_path, cfg->levels_path};
    sl_outfile out = {0};
    errno = 0;
    sl_status st = sl_outfile_open(&out, path, inputs, 4, err);
    if (st == SL_OK && kind == REP_PDF) {
        unsigned char *pdf = NULL;
        size_t len = 0;
        st = sl_report_estimate_pdf(rep, cfg->pdf_paper, &pdf, &len, err);
        if (st == SL_OK && fwrite(pdf, 1, len, out.fp) != len)
            st = sl_error_set(err, SL_EIO, "cannot write");
        free(pdf);
    } else if (st == SL_OK) {
        st = kind == REP_HTML ? sl_report_estimate_html(out.fp, rep, err)
                              : sl_report_estimate(out.fp, SL_FORMAT_JSON, rep, err);
    }
    /* the system's reason, taken before removing the temporary file can
     * set errno again (a failed commit names its own) */
    int why = st == SL_OK ? 0 : errno;
    if (st == SL_OK)
        st = sl_outfile_commit(&out, err);
    else
        sl_outfile_abort(&out);
    /* a write that failed names the file and the system's reason (a full
     * disk), not only that the report could not be written */
    if (st == SL_EIO && !strstr(err->msg, path)) {
        char msg[sizeof err->msg];
        snprintf(msg, sizeof msg, "%s%s%s", err->msg, why ? ": " : "", why ? strerror(why) : "");
        sl_error_set(err, SL_EIO, "%s: %s", path, msg);
    }
    free(path);
    return st;
}

/* A plan whose reports could not all be written keeps none: the log's row
 * (an error) must not name a report that stands as if it were complete. */
static void remove_reports(const sl_batch_config *cfg, sl_batch_entry *e)
{
    char **names[] = {&e->report_json, &e->report_html, &e->report_pdf};
    for (size_t k = 0; k < 3; k++) {
        if (!*names[k])
            continue;
        size_t n = strlen(cfg->outdir) + strlen(*names[k]) + 2;
        char *path = malloc(n);
        if (path) {
            snprintf(path, n, "%s/%s", cfg->outdir, *names[k]);
            (void)unlink(path);
            free(path);
        }
        free(*names[k]);
        *names[k] = NULL;
    }
}

/* The facts used (and the planning system's doses), as one line for the log. */
static void facts_text(const sl_facts_entry *f, const sl_batch_entry *e, bool tps_used,
                       sl_buf *b)
{
    if (tps_used) {
        sl_buf_printf(b, "tps-dose:");
        for (size_t i = 0; i < e->ntps; i++)
            sl_buf_printf(b, " %s", e->tps_paths[i]);
        sl_buf_printf(b, "; ");
    }
    if (!f) {
        sl_buf_printf(b, "facts: none");
        return;
    }
    sl_buf_printf(b, "facts: %s", f->key);
    if (!isnan(f->gestational_weeks))
        sl_buf_printf(b, "; gestational_age_weeks=%g", f->gestational_weeks);
    if (!isnan(f->conception_weeks))
        sl_buf_printf(b, "; weeks_after_conception=%g", f->conception_weeks);
    if (f->pacing_stated)
        sl_buf_printf(b, f->pacing_dependent ? "; pacing_dependent" : "; not pacing_dependent");
    if (!isnan(f->age_years))
        sl_buf_printf(b, "; age_years=%g", f->age_years);
    if (f->sex)
        sl_buf_printf(b, "; sex=%c", f->sex);
    for (size_t i = 0; i < f->nmap; i++)
        sl_buf_printf(b, "; organ %s=%s", f->map[i].roi, f->map[i].kind);
    for (size_t i = 0; i < f->nother; i++)
        sl_buf_printf(b, "; other_dose %s=%g cGy", f->other[i].roi, f->other[i].cgy);
}

static sl_status log_entry(const sl_batch_config *cfg, sl_batch_entry *e, const char *options,
                           sl_error *err)
{
    if (!cfg->log)
        return SL_OK;
    sl_log_organ *lo = calloc(e->nflagged ? e->nflagged : 1, sizeof *lo);
    if (!lo)
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    for (size_t i = 0; i < e->nflagged; i++) {
        const sl_flagged_organ *o = &e->organs[i];
        lo[i] = (sl_log_organ){o->roi, o->kind, o->status, o->course_cgy, o->upper_cgy, o->level,
                               o->level_gy};
    }
    sl_log_entry le = {
        .command = cfg->command,
        .plan_uid = e->plan_uid ? e->plan_uid : "",
        .structure_set_uid = e->ss_uid,
        .patient_id = e->patient_id,
        .plan_label = e->plan_label,
        .tool_version = sl_version(),
        .model_file = cfg->model_path,
        .model_machine = cfg->model->machine.name,
        .model_version = cfg->model->model_version,
        .model_sha256 = cfg->model->sha256,
        .levels_file = cfg->levels_path,
        .levels_sha256 = cfg->levels->sha256,
        .options = options,
        .outcome = sl_outcome_name(e->outcome),
        .worst_status = e->worst_status,
        .flagged = e->flagged,
        .message = e->message,
        .report_json = e->report_json,
        .report_html = e->report_html,
        .report_pdf = e->report_pdf,
        .organs_not_judged = e->unjudged,
        .norgans = e->nflagged,
        .organs = lo,
    };
    sl_status st = sl_screenlog_add(cfg->log, &le, &e->log_id, err);
    free(lo);
    return st;
}

/* The screening itself (sl_screen_run, as `estimate` does) with the
 * patient's facts. Takes ownership of plan and ss. */
static sl_status pipeline(const sl_batch_config *cfg, sl_plan *plan, sl_structure_set *ss,
                          const sl_facts_entry *facts, sl_rtdose *const *tps, size_t ntps,
                          sl_batch_entry *e, sl_error *err)
{
    sl_screen_request req;
    sl_screen_request_init(&req);
    req.estimate.tps = (const sl_rtdose *const *)tps;
    req.estimate.ntps = ntps;
    req.model = cfg->model;
    req.levels = cfg->levels;
    req.levels_path = cfg->levels_path;
    req.locate.threads = cfg->threads_per_plan;
    req.estimate.threads = cfg->threads_per_plan;
    /* a batch screens a plan it lacks a fact for, leaving that organ unjudged */
    req.patient.age_unknown_unjudged = true;
    if (facts) {
        sl_patient *pt = &req.patient;
        if (!isnan(facts->gestational_weeks)) {
            pt->gestational_weeks = facts->gestational_weeks;
            pt->conception_weeks = sl_weeks_after_conception(facts->gestational_weeks);
        }
        if (!isnan(facts->conception_weeks)) {
            pt->conception_weeks = facts->conception_weeks;
            pt->conception_given = true;
        }
        if (facts->pacing_stated) {
            pt->pacing_stated = true;
            pt->pacing_dependent = facts->pacing_dependent;
            pt->device_asked |= facts->pacing_dependent;
        }
        if (!isnan(facts->age_years)) {
            pt->age_years = facts->age_years;
            pt->age_from = "facts file";
        }
        if (facts->sex) {
            pt->sex = facts->sex;
            pt->sex_from = "facts file";
        }
        req.map = facts->map;
        req.nmap = facts->nmap;
        req.others = facts->other;
        req.nothers = facts->nother;
    }
    const char *plan_src = plan->source, *ss_src = ss->source;
    char *plan_path = strdup(plan_src ? plan_src : ""), *ss_path = strdup(ss_src ? ss_src : "");
    sl_screen *scr = NULL;
    sl_status st = !plan_path || !ss_path ? sl_error_set(err, SL_ENOMEM, "out of memory")
                                          : SL_OK;
    if (st == SL_OK)
        st = sl_screen_run(plan, ss, &req, &scr, err);
    else {
        sl_plan_free(plan);
        sl_structure_set_free(ss);
    }
    if (st == SL_OK) {
        sl_estimate_report rep = {scr->plan, scr->ss, scr->loc, scr->est, scr->as,
                                  cfg->model, cfg->levels, scr->whatifs, scr->nwhatifs};
        char pid[48], label[48], name[256];
        sl_sanitise_name(e->patient_id ? e->patient_id : "no-id", pid, sizeof pid);
        sl_sanitise_name(e->plan_label ? e->plan_label : "plan", label, sizeof label);
        snprintf(name, sizeof name, "%s_%s_%s.json", pid[0] ? pid : "no-id",
                 label[0] ? label : "plan", e->plan_uid);
        /* what the screening found first: a report that cannot be written
         * (a full disk) leaves the plan an error, and the log still holds
         * its flagged organs (found by an independent review: they were
         * lost with the report) */
        for (size_t b = 0; b < scr->plan->nbeams; b++)
            e->nbeams += sl_beam_skip_reason(&scr->plan->beams[b]) == NULL;
        bool ok = collect(scr->as, e);
        if (!ok)
            st = sl_error_set(err, SL_ENOMEM, "out of memory");
        if (st == SL_OK)
            st = write_report(cfg, name, REP_JSON, &rep, plan_path, ss_path, err);
        if (st == SL_OK) {
            e->report_json = xstrdup(name, &ok);
            memcpy(name + strlen(name) - 5, ".html", 6);
            st = write_report(cfg, name, REP_HTML, &rep, plan_path, ss_path, err);
        }
        if (st == SL_OK)
            e->report_html = xstrdup(name, &ok);
        if (st == SL_OK && cfg->pdf_paper) {
            memcpy(name + strlen(name) - 5, ".pdf", 5);
            st = write_report(cfg, name, REP_PDF, &rep, plan_path, ss_path, err);
            if (st == SL_OK)
                e->report_pdf = xstrdup(name, &ok);
        }
        if (st == SL_OK && !ok)
            st = sl_error_set(err, SL_ENOMEM, "out of memory");
        if (st != SL_OK)
            remove_reports(cfg, e);
    }
    sl_screen_free(scr);
    free(plan_path);
    free(ss_path);
    return st;
}

/* The note on the planning system's doses, one more part. */
static void tps_note(sl_batch_entry *e, bool *ok, const char *text)
{
    size_t n = (e->tps_note ? strlen(e->tps_note) + 2 : 0) + strlen(text) + 1;
    char *c = malloc(n);
    if (!c) {
        *ok = false;
        return;
    }
    snprintf(c, n, "%s%s%s", e->tps_note ? e->tps_note : "", e->tps_note ? "; " : "", text);
    free(e->tps_note);
    e->tps_note = c;
}

/* Read the RT Doses the pairing gave this plan and check that they can be
 * combined with it as `estimate --tps-dose` would: each belongs to the plan
 * (frame, plan UID, beams), a PLAN dose alone or BEAM doses that hold each
 * screened beam once, a plan of one fraction group. Anything amiss and none
 * is used: the note says why (never a silent partial use). Returns the
 * number read into tps (0: none used); -1 when out of memory. */
static long read_doses(sl_batch_entry *e, const sl_plan *plan, sl_rtdose **tps, bool *ok)
{
    sl_error derr = {0};
    size_t n = 0;
    sl_status st = SL_OK;
    for (; n < e->ntps && st == SL_OK; n++) {
        st = sl_rtdose_read(e->tps_paths[n], &tps[n], &derr);
        if (st == SL_OK)
            st = sl_rtdose_check_plan(tps[n], plan, &derr);
        if (st != SL_OK) {
            n++; /* free it too (NULL when the read failed) */
            break;
        }
    }
    if (st == SL_OK && plan->ngroups != 1)
        st = sl_error_set(&derr, SL_EINPUT,
                          "%s: %zu fraction groups: the planning system's dose is combined with "
                          "a plan of one fraction group only",
                          plan->source, plan->ngroups);
    if (st == SL_OK && tps[0]->summation == SL_RTDOSE_BEAM) {
        for (size_t b = 0; b < plan->nbeams && st == SL_OK; b++) {
            if (sl_beam_skip_reason(&plan->beams[b]) != NULL)
                continue;
            int num = plan->beams[b].number, times = 0;
            for (size_t f = 0; f < n; f++)
                for (size_t k = 0; k < tps[f]->nbeams; k++)
                    times += tps[f]->beams[k] == num;
            if (times != 1)
                st = sl_error_set(&derr, SL_EINPUT,
                                  "beam %d is in %d of the BEAM doses found: each screened beam "
                                  "must be in exactly one",
                                  num, times);
        }
    }
    if (st == SL_ENOMEM) {
        for (size_t i = 0; i < n; i++)
            sl_rtdose_free(tps[i]);
        return -1;
    }
    char line[1400];
    if (st != SL_OK) {
        for (size_t i = 0; i < n; i++) {
            sl_rtdose_free(tps[i]);
            tps[i] = NULL;
        }
        snprintf(line, sizeof line,
                 "the planning system's dose refused for this plan, screened with the model "
                 "only: %s",
                 derr.msg);
        tps_note(e, ok, line);
        return 0;
    }
    for (size_t i = 0; i < n; i++) {
        snprintf(line, sizeof line,
                 "RT Dose %s (%s) used: the planning system's dose within %.1f cm of the field "
                 "edges, the model beyond",
                 e->tps_paths[i], tps[i]->summation == SL_RTDOSE_PLAN ? "PLAN" : "BEAM",
                 SL_TPS_ZONE_CM);
        tps_note(e, ok, line);
    }
    return (long)n;
}

sl_status sl_batch_screen(const sl_batch_config *cfg, sl_batch_entry *e, sl_error *err)
{
    sl_error perr = {0};
    sl_plan *plan = NULL;
    sl_structure_set *ss = NULL;
    bool ok = true;
    sl_status st = sl_dicom_read_plan(e->plan_path, &plan, &perr);
    if (st == SL_OK)
        st = sl_dicom_read_structures(e->ss_path, &ss, &perr);
    const sl_facts_entry *facts = NULL;
    sl_facts_entry fview = {0};
    if (st == SL_OK) {
        /* identities from the full reader (UTF-8, whole), not the header pass */
        free(e->patient_id);
        free(e->plan_label);
        free(e->plan_uid);
        free(e->ss_uid);
        e->patient_id = xstrdup(plan->patient_id, &ok);
        e->plan_label = xstrdup(plan->label, &ok);
        e->plan_uid = xstrdup(plan->sop_instance_uid, &ok);
        e->ss_uid = xstrdup(ss->sop_instance_uid, &ok);
        if (!ok || !e->plan_uid || !sl_dicom_uid_valid(e->plan_uid)) {
            st = ok ? sl_error_set(&perr, SL_EINPUT, "%s: SOPInstanceUID (0008,0018): not a "
                                                     "valid UID",
                                   e->plan_path)
                    : sl_error_set(&perr, SL_ENOMEM, "out of memory");
        }
        bool found = false;
        if (st == SL_OK && cfg->facts)
            st = sl_facts_view(cfg->facts, e->plan_uid, e->patient_id, &fview, &found, &perr);
        facts = found ? &fview : NULL;
    }
    sl_rtdose **tps = NULL;
    long ntps = 0;
    if (st == SL_OK && e->ntps) {
        tps = calloc(e->ntps, sizeof *tps);
        ntps = tps ? read_doses(e, plan, tps, &ok) : -1;
        if (ntps < 0)
            st = sl_error_set(&perr, SL_ENOMEM, "out of memory");
    }
    if (st == SL_OK) {
        e->tps_used = ntps > 0;
        st = pipeline(cfg, plan, ss, facts, tps, (size_t)ntps, e, &perr);
        plan = NULL;
        ss = NULL;
    }
    for (long i = 0; i < ntps; i++)
        sl_rtdose_free(tps[i]);
    free(tps);
    sl_plan_free(plan);
    sl_structure_set_free(ss);
    if (st == SL_ENOMEM)
        return sl_error_set(err, SL_ENOMEM, "%s", perr.msg);
    if (st != SL_OK) {
        e->outcome = SL_OUT_ERROR;
        e->flagged = true; /* a plan that could not be screened needs a person */
        e->rank = RANK_ERROR;
        free(e->message);
        e->message = xstrdup(perr.msg[0] ? perr.msg : sl_status_name(st), &ok);
    } else {
        e->outcome = SL_OUT_SCREENED;
    }
    sl_buf opts = {0};
    facts_text(facts, e, ntps > 0, &opts);
    sl_facts_view_free(&fview);
    st = opts.failed ? sl_error_set(err, SL_ENOMEM, "out of memory")
                     : log_entry(cfg, e, opts.data, err);
    sl_buf_free(&opts);
    if (st == SL_OK && !ok)
        st = sl_error_set(err, SL_ENOMEM, "out of memory");
    return st;
}

static int rank_of(const sl_batch_entry *e)
{
    switch (e->outcome) {
    case SL_OUT_SCREENED: return e->rank;
    case SL_OUT_ERROR: return RANK_ERROR;
    case SL_OUT_INCOMPLETE: return RANK_INCOMPLETE;
    case SL_OUT_BAD: return RANK_BAD;
    /* one not screened again ranks by what its last screening found */
    case SL_OUT_SKIPPED:
        return e->flagged ? RANK_FLAGGED : e->unjudged ? RANK_NOT_JUDGED : RANK_SKIPPED;
    default: return RANK_OTHER;
    }
}

sl_status sl_batch_carry_last(sl_batch_entry *e, const sl_history_row *last, sl_error *err)
{
    bool ok = true, screened = last->outcome && strcmp(last->outcome, "screened") == 0;
    e->outcome = SL_OUT_SKIPPED;
    e->flagged = last->flagged || !screened;
    free(e->message);
    char buf[1024];
    snprintf(buf, sizeof buf,
             "--rescreen-stale: last screened with this version of the model (log id %lld, "
             "%s): not screened again; then: %s%s%s%s",
             last->id, last->screened_at ? last->screened_at : "?",
             last->outcome ? last->outcome : "?", last->flagged ? ", flagged" : "",
             last->message ? ": " : "", last->message ? last->message : "");
    e->message = xstrdup(buf, &ok);
    free(e->worst_status);
    e->worst_status = xstrdup(last->worst_status, &ok);
    free(e->unjudged);
    e->unjudged = xstrdup(last->organs_not_judged, &ok);
    char **reports[] = {&e->report_json, &e->report_html, &e->report_pdf};
    const char *from[] = {last->report_json, last->report_html, last->report_pdf};
    for (size_t k = 0; k < 3; k++) {
        free(*reports[k]);
        *reports[k] = xstrdup(from[k], &ok);
    }
    if (last->norgans && !e->organs) {
        e->organs = calloc(last->norgans, sizeof *e->organs);
        ok = ok && e->organs;
        for (size_t k = 0; e->organs && k < last->norgans; k++) {
            const sl_history_organ *g = &last->organs[k];
            sl_flagged_organ *o = &e->organs[e->nflagged++];
            o->roi = xstrdup(g->roi, &ok);
            o->kind = xstrdup(g->kind, &ok);
            o->status = xstrdup(g->status, &ok);
            o->level = xstrdup(g->level, &ok);
            o->course_cgy = g->course_cgy;
            o->upper_cgy = g->upper_cgy;
            o->level_gy = g->level_gy;
        }
    }
    return ok ? SL_OK : sl_error_set(err, SL_ENOMEM, "out of memory");
}

static int cmp_opt(const char *a, const char *b)
{
    return strcmp(a ? a : "", b ? b : "");
}

static int cmp_entry(const void *pa, const void *pb)
{
    const sl_batch_entry *a = pa, *b = pb;
    int ra = rank_of(a), rb = rank_of(b);
    if (ra != rb)
        return rb - ra;
    int c = cmp_opt(a->patient_id, b->patient_id);
    if (c == 0)
        c = cmp_opt(a->plan_label, b->plan_label);
    if (c == 0)
        c = cmp_opt(a->plan_path, b->plan_path);
    return c;
}

void sl_batch_sort(sl_batch_entry *e, size_t n)
{
    for (size_t i = 0; i < n; i++)
        e[i].rank = rank_of(&e[i]);
    if (n > 1)
        qsort(e, n, sizeof *e, cmp_entry);
}
