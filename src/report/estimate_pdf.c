/*
 * The printable report of `estimate --pdf`: the page a clinician signs.
 * Page 1 carries the verdict (each organ that needs attention, with its
 * dose, level and what to do), every what-if banner and the sign-off
 * block; the organ tables, advice with sources, beams, figures and the
 * generic cautions follow; with --tps-dose, after the organ tables, the
 * sources of each organ's dose and the comparison model / planning system
 * (as in the HTML). Every page names the patient and the plan and
 * says "page n of m". The same PDF bytes go into --pdf-dicom's object.
 */
#include "strayline/report.h"
#include "strayline/version.h"

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

#include "estimate_common.h"
#include "figure.h"
#include "pdf.h"

static const char *orq(const char *s)
{
    return s && *s ? s : "-";
}

/* The plan's approval, as the planning system exported it. */
static void approval_text(const sl_plan *p, char *buf, size_t n)
{
    char date[16] = "";
    if (p->review_date && strlen(p->review_date) == 8)
        snprintf(date, sizeof date, "%.4s-%.2s-%.2s", p->review_date, p->review_date + 4,
                 p->review_date + 6);
    if (!p->approval_status)
        snprintf(buf, n, "Plan approval status: not in the plan (RT Approval Status absent).");
    else
        snprintf(buf, n, "Plan approval status: %s%s%s%s%s (from the plan).", p->approval_status,
                 date[0] ? ", reviewed " : "", date, p->reviewer_name ? " by " : "",
                 p->reviewer_name ? p->reviewer_name : "");
}

/* The beam's figures, drawn by the same code as the HTML's: the
 * beam's-eye view, then the dose against distance at each judged organ's
 * own depth. */
static void beam_figures(pdoc *d, const sl_estimate_report *r, size_t b)
{
    double tw = d->w - d->left - d->right;
    fig_bev_ctx bctx = {r, b};
    pdoc_figure(d, tw, tw * 0.68, fig_bev, &bctx);
    const sl_estimate *e = r->est;
    for (size_t o = 0; o < e->norgans; o++) {
        const sl_assessment *a = &r->as->items[o];
        if (!e->organs[o].estimated || !(a->flagged || a->nchecks))
            continue;
        fig_dd_ctx dctx = {r, b, o};
        pdoc_figure(d, tw, tw * 0.55, fig_dose_distance, &dctx);
    }
}

static const double fill_att[3] = {0.97, 0.86, 0.86}, fill_meas[3] = {0.99, 0.94, 0.80},
                    fill_nj[3] = {0.90, 0.90, 0.94};

static void verdict(pdoc *d, const sl_estimate_report *r)
{
    char *res = est_result_text(r), line[1400];
    sl_buf rl = {0};
    sl_buf_printf(&rl, "RESULT: %s", res ? res : EST_RESULT_FALLBACK);
    free(res);
    const char *l = rl.data && !rl.failed ? rl.data : "RESULT: " EST_RESULT_FALLBACK;
    if (r->as->any_flagged)
        pdoc_banner(d, l, 11, 2.5, 0.55, 0.1, 0.1, false);
    else
        pdoc_banner(d, l, 11, 1.2, 0.2, 0.2, 0.2, false);
    sl_buf_free(&rl);
    est_ventry *v = NULL;
    size_t n = est_verdict(r, &v);
    if (n) {
        static const double w[] = {0.07, 0.15, 0.16, 0.2, 0.1, 0.32};
        static const char *const head[] = {"", "organ", "status", "dose", "level",
                                           "what to do"};
        ptable t = {6, w, head, 8};
        pdoc_table_head(d, &t);
        for (size_t i = 0; i < n; i++) {
            char st[200];
            snprintf(st, sizeof st, "%s%s", v[i].status, v[i].whatif ? " [what-if]" : "");
            char cue[16];
            snprintf(cue, sizeof cue, "%s %s", est_vshape(&v[i]), v[i].cue);
            const char *cells[] = {cue, v[i].organ, st,
                                   v[i].dose[0] ? v[i].dose : "-",
                                   v[i].level[0] ? v[i].level : "-", v[i].advice};
            pdoc_table_row(d, &t, cells,
                           v[i].kind == EST_V_ATTENTION ? fill_att
                           : v[i].kind == EST_V_MEASURE ? fill_meas
                                                        : fill_nj,
                           false);
        }
        pdoc_para(d,
                  "\u25B2 !! exceeds its level; \u25C6 ! may exceed (upper bound, k = 2) or "
                  "needs attention; \u25CF M measurement advised; ? not judged or not found.",
                  7.5, false);
    }
    free(v);
    sl_notes cc = {0};
    est_case_cautions(r, &cc);
    if (cc.count)
        pdoc_para(d, "This case:", 9, true);
    for (size_t i = 0; i < cc.count; i++) {
        snprintf(line, sizeof line, "\u2022 %s", cc.items[i]);
        pdoc_para(d, line, 8.5, false);
    }
    sl_notes_free(&cc);
    for (size_t i = 0; i < r->as->nother; i++) {
        char ob[400];
        est_other_beam_text(&r->as->other[i], ob, sizeof ob);
        snprintf(line, sizeof line, "\u2022 %s: its dose is NOT in this estimate", ob);
        pdoc_para(d, line, 8.5, false);
    }
    for (size_t i = 0; i < r->as->missing.count; i++) {
        snprintf(line, sizeof line, "\u2022 not found (asked for or expected): %s",
                 r->as->missing.items[i]);
        pdoc_para(d, line, 8.5, false);
    }
}

static void signoff(pdoc *d)
{
    pdoc_skip(d, 4);
    pdoc_need(d, 70);
    static const double w[] = {0.36, 0.40, 0.24};
    static const char *const head[] = {"prepared by (name, signature)",
                                       "reviewed by (qualified medical physicist)", "date"};
    ptable t = {3, w, head, 8.5};
    pdoc_table_head(d, &t);
    const char *cells[] = {"\n\n\n", "\n\n\n", "\n\n\n"};
    pdoc_table_row(d, &t, cells, NULL, false);
}

static void organ_table(pdoc *d, const sl_estimate_report *r, bool fetus)
{
    const sl_estimate *e = r->est;
    double s = fetus ? 10 : 1;
    const char *u = fetus ? "mGy" : "cGy";
    bool started = false;
    char h4[48], h5[48], h6[48], h7[48];
    snprintf(h4, sizeof h4, "max a fraction (%s), upper k=2", u);
    snprintf(h5, sizeof h5, "course max (%s), upper k=2", u);
    snprintf(h6, sizeof h6, "course mean (%s)", u);
    snprintf(h7, sizeof h7, "level (%s)", u);
    static const double w[] = {0.14, 0.09, 0.08, 0.09, 0.12, 0.13, 0.08, 0.08, 0.19};
    const char *head[] = {"organ", "kind", "distance (cm)", "depth (cm)", h4, h5, h6, h7,
                          "status"};
    ptable t = {9, w, head, 7.5};
    for (size_t o = 0; o < e->norgans; o++) {
        const sl_organ_dose *dd = &e->organs[o];
        const sl_assessment *a = &r->as->items[o];
        if (!dd->estimated || est_is_fetus(a) != fetus)
            continue;
        if (!started) {
            pdoc_heading(d, fetus ? "Fetus (mGy, the unit of its guidance documents)"
                                  : "Organs (cGy)",
                         11);
            pdoc_table_head(d, &t);
            started = true;
        }
        char nm[160], dist[24], depth[32], st[EST_STATUS_LEN + 200], marks[120];
        sl_text_escape(dd->roi->name, nm, sizeof nm);
        snprintf(dist, sizeof dist, "%.2f", dd->min_distance_cm);
        snprintf(depth, sizeof depth, "%.1f to %.1f", dd->min_depth_cm, dd->max_depth_cm);
        est_dose_cells c;
        est_organ_dose_cells(e, dd, a, s, &c);
        est_status_text(a, st, sizeof st);
        est_marks(dd, false, marks, sizeof marks);
        strncat(st, marks, sizeof st - strlen(st) - 1);
        strncat(st, est_whatif_mark(r, dd->roi->name), sizeof st - strlen(st) - 1);
        if (e->tps_used && dd->tps_samples) {
            char src[64];
            snprintf(src, sizeof src, " [dose: %s]", est_tps_source(dd));
            strncat(st, src, sizeof st - strlen(st) - 1);
        }
        const char *cells[] = {nm, est_kind(a), dist, depth, c.fx, c.course, c.mean, c.level, st};
        pdoc_table_row(d, &t, cells,
                       a->flagged ? fill_att : a->measurement_advised ? fill_meas : NULL, true);
    }
}

/* --tps-dose: each organ's dose source, the planning system's stated
 * uncertainty (from memory), and the comparison model / planning system by
 * distance, as in the HTML report. */
static void tps_section(pdoc *d, const sl_estimate_report *r)
{
    const sl_estimate *e = r->est;
    char line[1200], u[400];
    pdoc_heading(d, "The planning system's dose and the model", 11);
    sl_buf files = {0};
    for (size_t f = 0; f < e->opt.ntps; f++)
        sl_buf_printf(&files, "%s%s", f ? ", " : "", e->opt.tps[f]->source);
    snprintf(line, sizeof line,
             "Within %.1f cm of any field edge (the seam), and in the field, each sample's dose is "
             "the planning system's (RT Dose %s, trilinear in its grid); beyond the seam it is "
             "the model's.",
             e->tps_zone_cm, files.data && !files.failed ? files.data : "-");
    sl_buf_free(&files);
    pdoc_para(d, line, 8.5, false);
    est_tps_u_text(u, sizeof u);
    pdoc_para(d, u, 8.5, true);
    static const double w[] = {0.15, 0.15, 0.11, 0.11, 0.11, 0.11, 0.11, 0.15};
    static const char *const head[] = {"organ", "dose from", "volume from the planning system (%)",
                                       "maximum from", "nearest point from",
                                       "zone samples outside its grid",
                                       "zone samples where the model is higher",
                                       "uncertainty of the planning system's dose (k = 1)"};
    ptable t = {8, w, head, 7.5};
    pdoc_table_head(d, &t);
    for (size_t o = 0; o < e->norgans; o++) {
        const sl_organ_dose *dd = &e->organs[o];
        if (!dd->estimated)
            continue;
        char nm[160], vol[24], out[24], higher[24], uc[64];
        snprintf(vol, sizeof vol, "%.1f", 100 * dd->tps_volume_fraction);
        snprintf(out, sizeof out, "%zu", dd->tps_outside_grid);
        snprintf(higher, sizeof higher, "%zu", dd->tps_below_model);
        if (dd->tps_samples)
            snprintf(uc, sizeof uc, "%.0f %% of its dose (from memory)", 100 * SL_TPS_U_FRACTION);
        else
            snprintf(uc, sizeof uc, "-");
        const char *cells[] = {sl_text_escape(dd->roi->name, nm, sizeof nm), est_tps_source(dd),
                               vol, dd->max_from_tps ? "planning system" : "model",
                               dd->nearest_from_tps ? "planning system" : "model", out,
                               higher, uc};
        pdoc_table_row(d, &t, cells, NULL, true);
    }
    /* the heading, its paragraph and the table's first rows on one page */
    pdoc_need(d, 150);
    pdoc_heading(d, "Model / planning system by distance from the nearest field edge", 10);
    if (!e->nratios) {
        snprintf(line, sizeof line,
                 "No organ sample lies within %.0f cm beyond a field edge with both doses: "
                 "nothing to compare.",
                 SL_TPS_BAND_CM);
        pdoc_para(d, line, 8.5, false);
        return;
    }
    snprintf(line, sizeof line,
             "The ratio of the model's course dose to the planning system's at the organ samples "
             "0 to %.0f cm beyond the field edges, where both exist, in 1 cm bins; for every beam "
             "together and for each beam with a BEAM RT Dose of its own. Above 1: the planning "
             "system gives less than the measured model there.",
             SL_TPS_BAND_CM);
    pdoc_para(d, line, 8.5, false);
    static const double rw[] = {0.2, 0.2, 0.15, 0.15, 0.15, 0.15};
    static const char *const rh[] = {"beams", "distance from the edge (cm)", "samples",
                                     "mean ratio", "smallest", "largest"};
    ptable rt = {6, rw, rh, 7.5};
    pdoc_table_head(d, &rt);
    for (size_t k = 0; k < e->nratios; k++) {
        const sl_tps_ratio *q = &e->ratios[k];
        char c[6][32];
        est_tps_ratio_cells(q, c);
        const char *cells[] = {c[0], c[1], c[2], c[3], c[4], c[5]};
        pdoc_table_row(d, &rt, cells, NULL, false);
    }
    double tw = d->w - d->left - d->right;
    fig_tps_ctx tctx = {r};
    pdoc_figure(d, tw, tw * 0.5, fig_tps_ratio, &tctx);
}

static void advice(pdoc *d, const sl_estimate_report *r)
{
    const sl_estimate *e = r->est;
    bool any = false;
    char line[2000], nm[160];
    for (size_t o = 0; o < e->norgans; o++) {
        const sl_assessment *a = &r->as->items[o];
        if (a->advice.count == 0 && a->statements.count == 0 && a->nchecks == 0 &&
            isnan(a->lar_cases))
            continue;
        if (!any)
            pdoc_heading(d, "Advice and risk statements, with their sources", 11);
        any = true;
        pdoc_para(d, sl_text_escape(a->dose->roi->name, nm, sizeof nm), 9, true);
        size_t s0 = a->verdict ? 1 : 0;
        if (a->verdict) {
            snprintf(line, sizeof line, "\u2022 %s", a->statements.items[0]);
            pdoc_para(d, line, 8, false);
        }
        for (size_t i = 0; i < a->advice.count; i++) {
            snprintf(line, sizeof line, "\u2022 %s", a->advice.items[i]);
            pdoc_para(d, line, 8, false);
        }
        for (size_t i = s0; i < a->statements.count; i++) {
            snprintf(line, sizeof line, "\u2022 %s", a->statements.items[i]);
            pdoc_para(d, line, 8, false);
        }
        for (size_t c = 0; c < a->nchecks; c++) {
            snprintf(line, sizeof line, "\u2022 %s: %.1f %s (%s; %s): %s",
                     a->checks[c].level->name,
                     est_unit_scale(a) * 100 * a->checks[c].level->dose_gy, est_unit(a),
                     a->checks[c].level->source, a->checks[c].level->mark,
                     a->checks[c].exceeded         ? "exceeded"
                     : a->checks[c].upper_exceeded ? "reached by the upper bound"
                                                   : "not reached");
            pdoc_para(d, line, 8, false);
        }
        if (!isnan(a->lar_cases)) {
            snprintf(line, sizeof line,
                     "\u2022 lifetime attributable risk of cancer incidence: about %.2f cases per "
                     "100,000 patients for a mean course dose of %.1f cGy (%s; %s; a population "
                     "average, not an individual prediction)",
                     a->lar_cases, a->lar_mean_cgy, a->lar->source, a->lar->mark);
            pdoc_para(d, line, 8, false);
        }
    }
}

static void beams(pdoc *d, const sl_estimate_report *r)
{
    const sl_estimate *e = r->est;
    const sl_plan *p = r->plan;
    char line[800];
    for (size_t b = 0; b < e->nbeams; b++) {
        const sl_beam_dose *bd = &e->beams[b];
        const sl_beam *be = bd->place->beam;
        snprintf(line, sizeof line, "Beam %d '%s': %.0f MeV, applicator %s, insert %s",
                 be->number, orq(be->name), bd->energy_mev, bd->applicator, bd->insert);
        pdoc_heading(d, line, 10.5);
        char ssd[96], obl[32], lim[256];
        est_ssd_text(bd, ssd, sizeof ssd);
        est_obliquity_text(bd, obl, sizeof obl);
        est_limits_text(bd, lim, sizeof lim);
        snprintf(line, sizeof line,
                 "%.3f cGy/MU at dmax; %s; cutout factor %.3f%s; gantry %.1f deg, collimator "
                 "%.1f deg, couch %.1f deg; surface obliquity %s. %s.",
                 bd->dose_per_mu_cgy, ssd, bd->cutout_factor,
                 bd->cutout_factor_assumed ? " (assumed)" : "", be->gantry_deg,
                 be->collimator_deg, be->couch_deg, obl, lim);
        pdoc_para(d, line, 8.5, false);
        if (bd->model_flags & SL_MF_OPEN_FOR_CUTOUT)
            pdoc_para(d,
                      "The cutout is not commissioned: a conservative stand-in is used; "
                      "measure the cutout's profiles.",
                      8.5, true);
        for (size_t g = 0; g < e->ngroups; g++) {
            if (!isfinite(bd->ref_cgy[g]))
                continue;
            char mu[40];
            if (isfinite(bd->mu[g]))
                snprintf(mu, sizeof mu, "%.1f MU", bd->mu[g]);
            else
                snprintf(mu, sizeof mu, "MU not in the plan");
            snprintf(line, sizeof line,
                     "fraction group %d: %s; reference dose %.1f cGy a fraction at the "
                     "central-axis maximum%s; %d fractions",
                     p->groups[g].number, mu, bd->ref_cgy[g],
                     bd->reference_overridden ? " (set by option: what-if)" : "",
                     e->fractions[g]);
            pdoc_para(d, line, 8.5, false);
        }
        beam_figures(d, r, b);
    }
}

static void budget(pdoc *d, const sl_estimate_report *r)
{
    const sl_estimate *e = r->est;
    pdoc_heading(d, "Uncertainty budget of the course maximum (cGy, k = 1)", 11);
    static const double w[] = {0.16, 0.095, 0.095, 0.095, 0.095, 0.09, 0.09, 0.095, 0.09, 0.095};
    static const char *const head[] = {"organ",    "fit",      "measurement", "interpolation",
                                       "extrapolation", "stand-in", "tilt/SSD", "transfer",
                                       "setup shift", "combined"};
    ptable t = {10, w, head, 7.5};
    pdoc_table_head(d, &t);
    bool any_tps = false, any_elsewhere = false;
    for (size_t o = 0; o < e->norgans; o++) {
        const sl_organ_dose *dd = &e->organs[o];
        if (!dd->estimated)
            continue;
        double v[EST_NBUDGET];
        est_budget_values(&dd->course_max_budget, v);
        char nm[200], c[EST_NBUDGET][48];
        const char *cells[10] = {sl_text_escape(dd->roi->name, nm, sizeof nm)};
        for (size_t i = 0; i < EST_NBUDGET; i++) {
            est_num(v[i], c[i], sizeof c[i]);
            cells[i + 1] = c[i];
        }
        if (dd->upper_elsewhere && !dd->max_from_tps) {
            any_elsewhere = true;
            strncat(nm, " *", sizeof nm - strlen(nm) - 1);
        }
        if (dd->max_from_tps) {
            /* no model budget: the planning system's stated uncertainty only */
            any_tps = true;
            strncat(nm, " (planning system's dose)", sizeof nm - strlen(nm) - 1);
            for (size_t i = 0; i + 1 < EST_NBUDGET; i++)
                cells[i + 1] = "-";
            char x[24];
            est_num(v[EST_NBUDGET - 1], x, sizeof x);
            snprintf(c[EST_NBUDGET - 1], sizeof c[EST_NBUDGET - 1], "%s (%.0f %%, from memory)",
                     x, 100 * SL_TPS_U_FRACTION);
        }
        pdoc_table_row(d, &t, cells, NULL, true);
    }
    if (any_tps) {
        char line[300];
        snprintf(line, sizeof line,
                 "An organ whose maximum is the planning system's dose has no model budget: its "
                 "uncertainty is the stated %.0f %% of that dose (k = 1), a value from memory.",
                 100 * SL_TPS_U_FRACTION);
        pdoc_para(d, line, 7.5, false);
    }
    if (any_elsewhere)
        pdoc_para(d,
                  "* The budget is the hottest sample's; the organ's upper bound is another "
                  "sample's, higher (the uncertainty grows with distance from the field), so "
                  "the u shown in the organ table is the one that bound implies, above this "
                  "combined value.",
                  7.5, false);
}

static void inputs(pdoc *d, const sl_estimate_report *r)
{
    const sl_plan *p = r->plan;
    pdoc_heading(d, "Inputs", 11);
    static const double w[] = {0.3, 0.7};
    static const char *const head[] = {"", ""};
    ptable t = {2, w, head, 7.5};
    char tool[64];
    snprintf(tool, sizeof tool, "strayline %s", sl_version());
    const char *const rows[][2] = {
        {"patient", orq(p->patient_name)},
        {"patient ID", orq(p->patient_id)},
        {"plan", orq(p->label)},
        {"plan file", orq(p->source)},
        {"plan SOP Instance UID", orq(p->sop_instance_uid)},
        {"structure set", orq(r->ss->source)},
        {"structure set SOP Instance UID", orq(r->ss->sop_instance_uid)},
        {"model", orq(r->model->source)},
        {"machine", orq(r->model->machine.name)},
        {"model version", orq(r->model->model_version)},
        {"model SHA-256", orq(r->model->sha256)},
        {"action levels", orq(r->levels->source)},
        {"action levels SHA-256", orq(r->levels->sha256)},
        {"tool", tool},
    };
    for (size_t i = 0; i < sizeof rows / sizeof *rows; i++) {
        const char *cells[] = {rows[i][0], rows[i][1]};
        pdoc_table_row(d, &t, cells, NULL, true);
    }
}

static void compose(pdoc *d, const sl_estimate_report *r, const char *date)
{
    const sl_plan *p = r->plan;
    char line[1600];
    pdoc_heading(d, "Out-of-field dose: screening estimate", 16);
    char pd[16] = "";
    if (p->plan_date && strlen(p->plan_date) == 8)
        snprintf(pd, sizeof pd, "%.4s-%.2s-%.2s", p->plan_date, p->plan_date + 4,
                 p->plan_date + 6);
    snprintf(line, sizeof line, "Patient %s, ID %s. Plan %s%s%s. Structure set %s.",
             orq(p->patient_name), orq(p->patient_id), orq(p->label), pd[0] ? ", dated " : "",
             pd, orq(r->ss->label));
    pdoc_para(d, line, 9.5, false);
    approval_text(p, line, sizeof line);
    pdoc_para(d, line, 9.5, false);
    snprintf(line, sizeof line, "Model %s (machine %s, version %s); action levels %s. Report %s, "
                                "strayline %s.",
             orq(r->model->source), r->model->machine.name, r->model->model_version,
             orq(r->levels->source), date, sl_version());
    pdoc_para(d, line, 8.5, false);
    char cautions[EST_MAX_CAUTIONS][EST_CAUTION_LEN];
    size_t nc = est_cautions(r, cautions, EST_MAX_CAUTIONS);
    if (r->model->machine.invented || r->model->notice)
        pdoc_banner(d, cautions[0], 10, 2.5, 0, 0, 0, false);
    for (size_t i = 0; i < r->nwhatifs; i++) {
        snprintf(line, sizeof line, "WHAT-IF, NOT THE PLAN AS DELIVERED: %s", r->whatifs[i].text);
        pdoc_banner(d, line, 9, 2, 0.55, 0.3, 0, true);
    }
    verdict(d, r);
    pdoc_para(d,
              "A screening estimate from measured out-of-field profiles of one machine, not a "
              "measurement: confirm high values by in-vivo measurement; local protocols and a "
              "qualified medical physicist decide.",
              8, true);
    signoff(d);

    organ_table(d, r, false);
    organ_table(d, r, true);
    if (r->est->tps_used)
        tps_section(d, r);
    bool any = false;
    char nm[160];
    for (size_t o = 0; o < r->est->norgans; o++) {
        const sl_organ_dose *dd = &r->est->organs[o];
        if (dd->estimated)
            continue;
        if (!any)
            pdoc_heading(d, "Not estimated", 10);
        any = true;
        snprintf(line, sizeof line, "\u2022 %s: %s", sl_text_escape(dd->roi->name, nm, sizeof nm),
                 orq(dd->excluded_why));
        pdoc_para(d, line, 8.5, false);
    }
    snprintf(line, sizeof line, "Marks: %s%s.", est_marks_legend(),
             r->nwhatifs ? "; [what-if] a what-if option changed this number" : "");
    pdoc_para(d, line, 7.5, false);
    advice(d, r);
    beams(d, r);
    budget(d, r);
    inputs(d, r);
    pdoc_heading(d, "Cautions", 11);
    for (size_t i = 0; i < nc; i++) {
        snprintf(line, sizeof line, "\u2022 %s", cautions[i]);
        pdoc_para(d, line, 8, false);
    }
    sl_notes w = {0};
    est_warnings(r, &w);
    if (w.count)
        pdoc_heading(d, "Warnings", 11);
    for (size_t i = 0; i < w.count; i++) {
        snprintf(line, sizeof line, "\u2022 %s", w.items[i]);
        pdoc_para(d, line, 8, false);
    }
    sl_notes_free(&w);
}

typedef struct compose_ctx {
    const sl_estimate_report *r;
    const char *date;
} compose_ctx;

static void compose_pass(pdoc *d, const void *ctx)
{
    const compose_ctx *c = ctx;
    compose(d, c->r, c->date);
}

sl_status sl_report_estimate_pdf(const sl_estimate_report *r, const char *paper,
                                 unsigned char **pdf, size_t *len, sl_error *err)
{
    *pdf = NULL;
    *len = 0;
    sl_status st = est_check_finite(r, err);
    if (st != SL_OK)
        return st;
    char date[32];
    time_t now = time(NULL);
    struct tm tmv;
    /* UTC, said so, as the log and listen give times */
    if (!gmtime_r(&now, &tmv) || !strftime(date, sizeof date, "%Y-%m-%d %H:%M UTC", &tmv))
        snprintf(date, sizeof date, "-");
    const sl_plan *p = r->plan;
    pdoc d;
    memset(&d, 0, sizeof d);
    snprintf(d.head_left, sizeof d.head_left,
             "strayline out-of-field dose: SCREENING ESTIMATE%s",
             r->nwhatifs ? " with WHAT-IF options" : "");
    snprintf(d.head_right, sizeof d.head_right, "Patient %s, ID %s", orq(p->patient_name),
             orq(p->patient_id));
    snprintf(d.foot_left, sizeof d.foot_left, "report %s; plan %s (%s)", date, orq(p->label),
             orq(p->sop_instance_uid));
    compose_ctx c = {r, date};
    return pdoc_render(&d, paper, compose_pass, &c, pdf, len, err);
}
