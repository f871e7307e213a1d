/*
 * The HTML report of `estimate --html`: one self-contained file (a libxml2
 * tree with inline SVG drawn by the figure code; no external reference).
 * It opens with the verdict box (each organ that needs attention, a
 * measurement, or was not judged or found, with a shape cue beside the
 * colour) and every what-if banner, then the organ tables (cGy; a fetus in
 * mGy), the generic cautions and inputs, the advice with sources, and for
 * each beam its beam's-eye view and the dose against distance at each
 * judged organ's own depth, then a dose-volume histogram for each organ.
 * With the planning system's dose (--tps-dose) a section after the organ
 * tables says where each organ's dose came from, states the planning
 * system's uncertainty (and that the value is from memory), and shows the
 * ratio model / planning system by distance as a table and a figure.
 */
#include "strayline/report.h"
#include "strayline/version.h"

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "estimate_common.h"
#include "figure.h"
#include "html.h"

static const char *num(char *buf, size_t n, double v)
{
    est_num(v, buf, n);
    return buf;
}

static const char *vclass(const est_ventry *v)
{
    switch (v->kind) {
    case EST_V_ATTENTION: return "v-att";
    case EST_V_MEASURE: return "v-meas";
    default: return "v-nj";
    }
}

/* One organ table in one unit (cGy for organs, mGy for a fetus). */
static void organ_table(hdoc *h, xmlNodePtr b, const sl_estimate_report *r, bool fetus)
{
    const sl_estimate *e = r->est;
    double s = fetus ? 10 : 1;
    const char *u = fetus ? "mGy" : "cGy";
    xmlNodePtr ot = NULL;
    char buf[700];
    for (size_t o = 0; o < e->norgans; o++) {
        const sl_organ_dose *d = &e->organs[o];
        const sl_assessment *a = &r->as->items[o];
        if (!d->estimated || est_is_fetus(a) != fetus)
            continue;
        if (!ot) {
            hel(h, b, "h3", fetus ? "Fetus (mGy, the unit of its guidance documents)"
                                  : "Organs (cGy)");
            ot = hel(h, b, "table", NULL);
            hattr(h, ot, "class", "organs");
            char c4[64], c5[64], c6[64], c7[64];
            snprintf(c4, sizeof c4, "max a fraction (%s), upper k=2", u);
            snprintf(c5, sizeof c5, "course max (%s), upper k=2", u);
            snprintf(c6, sizeof c6, "course mean (%s)", u);
            snprintf(c7, sizeof c7, "level (%s)", u);
            const char *head[] = {"organ", "kind", "nearest distance from the field edge (cm)",
                                  "depth (cm)", c4, c5, c6, c7, "status"};
            hrow(h, ot, true, head, 9);
        }
        xmlNodePtr tr = hel(h, ot, "tr", NULL);
        hel(h, tr, "td", d->roi->name);
        hel(h, tr, "td", est_kind(a));
        char x1[32], x2[32];
        snprintf(buf, sizeof buf, "%.2f", d->min_distance_cm);
        hattr(h, hel(h, tr, "td", buf), "class", "n");
        snprintf(buf, sizeof buf, "%.1f to %.1f", d->min_depth_cm, d->max_depth_cm);
        hattr(h, hel(h, tr, "td", buf), "class", "n");
        if (e->ngroups == 1)
            snprintf(buf, sizeof buf, "%s (%s)", num(x1, sizeof x1, s * d->fx_max[0].cgy),
                     num(x2, sizeof x2, s * d->fx_max[0].upper_cgy));
        else {
            est_dose_cells dc;
            est_organ_dose_cells(e, d, a, s, &dc);
            snprintf(buf, sizeof buf, "%s", dc.fx);
        }
        hattr(h, hel(h, tr, "td", buf), "class", "n");
        snprintf(buf, sizeof buf, "%s (%s)", num(x1, sizeof x1, s * d->course_max.cgy),
                 num(x2, sizeof x2, s * d->course_max.upper_cgy));
        hattr(h, hel(h, tr, "td", buf), "class", "n");
        hattr(h, hel(h, tr, "td", num(x1, sizeof x1, s * d->course_mean.cgy)), "class", "n");
        /* the level and its name here; its source with the advice below */
        if (a->governing)
            snprintf(buf, sizeof buf, "%s (%s)",
                     num(x1, sizeof x1, s * 100 * a->governing->dose_gy), a->governing->mark);
        else if (a->unjudged_level_gy > 0)
            snprintf(buf, sizeof buf, "%s (not judged)",
                     num(x1, sizeof x1, s * 100 * a->unjudged_level_gy));
        else if (a->status == SL_ST_BAND)
            snprintf(buf, sizeof buf, "risk bands (%s)", a->kind->bands_mark);
        else
            snprintf(buf, sizeof buf, "-");
        xmlNodePtr lt = hel(h, tr, "td", buf);
        if (a->governing)
            hattr(h, lt, "title", a->governing->source);
        else if (a->unjudged_level_gy > 0)
            hattr(h, lt, "title", est_unjudged_level_text);
        char st[EST_STATUS_LEN + 160], marks[120];
        est_status_text(a, st, sizeof st);
        est_marks(d, false, marks, sizeof marks);
        strncat(st, marks, sizeof st - strlen(st) - 1);
        strncat(st, est_whatif_mark(r, d->roi->name), sizeof st - strlen(st) - 1);
        if (e->tps_used && d->tps_samples) {
            char src[64];
            snprintf(src, sizeof src, " [dose: %s]", est_tps_source(d));
            strncat(st, src, sizeof st - strlen(st) - 1);
        }
        xmlNodePtr td = hel(h, tr, "td", st);
        if (a->status == SL_ST_EXCEEDS || (a->status == SL_ST_BAND && a->flagged))
            hattr(h, td, "class", "status-exceeds");
        else if (a->status == SL_ST_MAY_EXCEED)
            hattr(h, td, "class", "status-may");
    }
}

/* --tps-dose: where each organ's dose came from (the seam), the stated
 * uncertainty of the planning system's dose, and the comparison model /
 * planning system by distance, as a table and a figure. */
static void tps_section(hdoc *h, xmlNodePtr b, const sl_estimate_report *r)
{
    const sl_estimate *e = r->est;
    char buf[800], u[400];
    xmlNodePtr sec = hel(h, b, "section", NULL);
    hattr(h, sec, "id", "planning-system");
    hel(h, sec, "h2", "The planning system's dose and the model");
    sl_buf files = {0};
    for (size_t f = 0; f < e->opt.ntps; f++)
        sl_buf_printf(&files, "%s%s", f ? ", " : "", e->opt.tps[f]->source);
    helf(h, sec, "p",
         "Within %.1f cm of any field edge (the seam), and in the field, each sample's dose is "
         "the planning system's (RT Dose %s, trilinear in its grid); beyond the seam it is the "
         "model's.",
         e->tps_zone_cm, files.data && !files.failed ? files.data : "-");
    sl_buf_free(&files);
    est_tps_u_text(u, sizeof u);
    xmlNodePtr ud = hel(h, sec, "p", u);
    hattr(h, ud, "class", "caution");
    hel(h, sec, "h3", "Where each organ's dose came from");
    xmlNodePtr t = hel(h, sec, "table", NULL);
    const char *head[] = {"organ", "dose from", "volume from the planning system (%)",
                          "maximum from", "nearest point from",
                          "zone samples outside its grid (model used)",
                          "zone samples where the model is higher (model used)",
                          "uncertainty of the planning system's dose (k = 1)"};
    hrow(h, t, true, head, 8);
    for (size_t o = 0; o < e->norgans; o++) {
        const sl_organ_dose *d = &e->organs[o];
        if (!d->estimated)
            continue;
        xmlNodePtr tr = hel(h, t, "tr", NULL);
        hel(h, tr, "td", d->roi->name);
        hel(h, tr, "td", est_tps_source(d));
        snprintf(buf, sizeof buf, "%.1f", 100 * d->tps_volume_fraction);
        hattr(h, hel(h, tr, "td", buf), "class", "n");
        hel(h, tr, "td", d->max_from_tps ? "planning system" : "model");
        hel(h, tr, "td", d->nearest_from_tps ? "planning system" : "model");
        snprintf(buf, sizeof buf, "%zu", d->tps_outside_grid);
        hattr(h, hel(h, tr, "td", buf), "class", "n");
        snprintf(buf, sizeof buf, "%zu", d->tps_below_model);
        hattr(h, hel(h, tr, "td", buf), "class", "n");
        if (d->tps_samples)
            snprintf(buf, sizeof buf, "%.0f %% of its dose (from memory)",
                     100 * SL_TPS_U_FRACTION);
        else
            snprintf(buf, sizeof buf, "-");
        hel(h, tr, "td", buf);
    }
    hel(h, sec, "h3", "Model / planning system by distance from the nearest field edge");
    if (!e->nratios) {
        helf(h, sec, "p",
             "No organ sample lies within %.0f cm beyond a field edge with both doses: nothing to "
             "compare.",
             SL_TPS_BAND_CM);
        return;
    }
    helf(h, sec, "p",
         "The ratio of the model's course dose to the planning system's at the organ samples "
         "0 to %.0f cm beyond the field edges, where both exist, in 1 cm bins; for every beam "
         "together, and for each beam that has a dose of its own (a BEAM RT Dose). A ratio above "
         "1 means the planning system gives less than the measured model there.",
         SL_TPS_BAND_CM);
    xmlNodePtr rt = hel(h, sec, "table", NULL);
    const char *rh[] = {"beams", "distance from the edge (cm)", "samples", "mean ratio",
                        "smallest", "largest"};
    hrow(h, rt, true, rh, 6);
    for (size_t k = 0; k < e->nratios; k++) {
        const sl_tps_ratio *q = &e->ratios[k];
        char c[6][32];
        est_tps_ratio_cells(q, c);
        xmlNodePtr tr = hel(h, rt, "tr", NULL);
        hel(h, tr, "td", c[0]);
        for (int i = 1; i < 6; i++)
            hattr(h, hel(h, tr, "td", c[i]), "class", "n");
    }
    fig_tps_ctx tctx = {r};
    fig_svg_into(h, sec, 560, 300, fig_tps_ratio, &tctx);
}

sl_status sl_report_estimate_html(FILE *fp, const sl_estimate_report *r, sl_error *err)
{
    const sl_estimate *e = r->est;
    const sl_plan *p = r->plan;
    sl_status st0 = est_check_finite(r, err);
    if (st0 != SL_OK)
        return st0;
    hdoc h;
    if (!hdoc_new(&h, "strayline: out-of-field dose screening estimate", sl_report_css))
        return sl_error_set(err, SL_ENOMEM, "out of memory building the HTML report");
    xmlNodePtr b = h.body;
    {
        /* printed pages name the patient and count themselves (CSS paged
         * media margin boxes); the names go in as CSS strings, escaped */
        char pid[400], esc[900], css[1400];
        snprintf(pid, sizeof pid, "Patient %s, ID %s; plan %s",
                 p->patient_name ? p->patient_name : "-", p->patient_id ? p->patient_id : "-",
                 p->label ? p->label : "-");
        size_t k = 0;
        for (const char *c = pid; *c && k + 8 < sizeof esc; c++) {
            if (*c == '"' || *c == '\\' || *c == '<' || *c == '>' || *c == '&' ||
                (unsigned char)*c < 0x20)
                k += (size_t)snprintf(esc + k, sizeof esc - k, "\\%02x ", (unsigned char)*c);
            else
                esc[k++] = *c;
        }
        esc[k] = '\0';
        snprintf(css, sizeof css,
                 "@page{@top-left{content:\"strayline screening estimate\";font-size:8pt}"
                 "@top-right{content:\"%s\";font-size:8pt}"
                 "@bottom-right{content:\"page \" counter(page) \" of \" counter(pages);"
                 "font-size:8pt}}",
                 esc);
        hel(&h, h.head, "style", css);
    }
    hel(&h, b, "h1", "Out-of-field dose: screening estimate");
    helf(&h, b, "p", "Patient %s, ID %s; plan %s; model %s (version %s).",
         p->patient_name ? p->patient_name : "-", p->patient_id ? p->patient_id : "-",
         p->label ? p->label : "-", r->model->source ? r->model->source : "-",
         r->model->model_version);
    char cautions[EST_MAX_CAUTIONS][EST_CAUTION_LEN];
    size_t nc = est_cautions(r, cautions, EST_MAX_CAUTIONS);
    char buf[512];
    if (r->model->machine.invented || r->model->notice) {
        xmlNodePtr inv = hel(&h, b, "div", cautions[0]);
        hattr(&h, inv, "class", "banner");
    }
    /* what-ifs: at the top, before any number */
    for (size_t i = 0; i < r->nwhatifs; i++) {
        xmlNodePtr wd = hel(&h, b, "div", NULL);
        hattr(&h, wd, "class", "whatif");
        hel(&h, wd, "strong", "WHAT-IF, NOT THE PLAN AS DELIVERED: ");
        htext(&h, wd, r->whatifs[i].text);
    }

    /* the verdict box */
    char *res = est_result_text(r);
    xmlNodePtr vb = hel(&h, b, "div", NULL);
    hattr(&h, vb, "class", r->as->any_flagged ? "verdict attention" : "verdict");
    hattr(&h, vb, "id", "verdict");
    xmlNodePtr rh = hel(&h, vb, "h2", "Result: ");
    htext(&h, rh, res ? res : EST_RESULT_FALLBACK);
    free(res);
    est_ventry *ve = NULL;
    size_t nve = est_verdict(r, &ve);
    if (nve) {
        xmlNodePtr vt = hel(&h, vb, "table", NULL);
        const char *vh[] = {"", "organ", "status", "dose", "level", "what to do"};
        hrow(&h, vt, true, vh, 6);
        for (size_t i = 0; i < nve; i++) {
            xmlNodePtr tr = hel(&h, vt, "tr", NULL);
            hattr(&h, tr, "class", vclass(&ve[i]));
            hattr(&h, hel(&h, tr, "td", est_vshape(&ve[i])), "class", "cue");
            hel(&h, tr, "td", ve[i].organ);
            snprintf(buf, sizeof buf, "%s%s", ve[i].status, ve[i].whatif ? " [what-if]" : "");
            hel(&h, tr, "td", buf);
            hel(&h, tr, "td", ve[i].dose[0] ? ve[i].dose : "-");
            hel(&h, tr, "td", ve[i].level[0] ? ve[i].level : "-");
            hel(&h, tr, "td", ve[i].advice);
        }
        hel(&h, vb, "p",
            "\u25B2 exceeds its level; \u25C6 may exceed (upper bound) or needs attention; "
            "\u25CF measurement advised; ? not judged or not found.");
    }
    free(ve);
    sl_notes cc = {0};
    est_case_cautions(r, &cc);
    if (cc.count) {
        hel(&h, vb, "strong", "This case:");
        xmlNodePtr cl = hel(&h, vb, "ul", NULL);
        for (size_t i = 0; i < cc.count; i++)
            hel(&h, cl, "li", cc.items[i]);
    }
    sl_notes_free(&cc);
    if (r->as->nother) {
        xmlNodePtr od = hel(&h, vb, "div", NULL);
        hattr(&h, od, "class", "caution");
        hel(&h, od, "strong", "Other treatment beams: their dose is NOT in this estimate");
        xmlNodePtr ol = hel(&h, od, "ul", NULL);
        for (size_t i = 0; i < r->as->nother; i++) {
            char ob[400];
            est_other_beam_text(&r->as->other[i], ob, sizeof ob);
            hel(&h, ol, "li", ob);
        }
    }
    if (r->as->missing.count) {
        xmlNodePtr md = hel(&h, vb, "div", NULL);
        hattr(&h, md, "class", "caution");
        hel(&h, md, "strong", "Not found (asked for or expected)");
        xmlNodePtr ml = hel(&h, md, "ul", NULL);
        for (size_t i = 0; i < r->as->missing.count; i++)
            hel(&h, ml, "li", r->as->missing.items[i]);
    }

    organ_table(&h, b, r, false);
    organ_table(&h, b, r, true);
    if (e->tps_used)
        tps_section(&h, b, r);
    const sl_patient *pt = &r->as->patient;
    /* weeks never rounded up into the next week (as the text report) */
    int dg = sl_decimals_below(pt->gestational_weeks, ceil(pt->gestational_weeks), 1),
        dc = sl_decimals_below(pt->conception_weeks, ceil(pt->conception_weeks), 1);
    if (!isnan(pt->gestational_weeks))
        helf(&h, b, "p",
             "Pregnant patient: gestational age %.*f weeks (since the last menstrual period), "
             "about %.*f weeks after conception (the ICRP Publication 84 count).",
             dg, pt->gestational_weeks, dc, pt->conception_weeks);
    else if (!isnan(pt->conception_weeks))
        helf(&h, b, "p", "Pregnant patient: %.*f weeks after conception (given).", dc,
             pt->conception_weeks);
    if (pt->pacing_dependent && pt->pacing_stated)
        hel(&h, b, "p", "The patient is pacing-dependent.");
    else if (est_pacing_assumed(r))
        hel(&h, b, "p", "Pacing dependence not stated: a cardiac device is judged as for a "
                        "pacing-dependent patient.");
    if (!isnan(pt->age_years))
        helf(&h, b, "p", "Age %.0f years (%s).", pt->age_years,
             pt->age_from ? pt->age_from : "given");
    if (pt->sex)
        helf(&h, b, "p", "Sex %c (%s).", pt->sex, pt->sex_from ? pt->sex_from : "given");
    xmlNodePtr cdiv = hel(&h, b, "div", NULL);
    hattr(&h, cdiv, "class", "caution");
    hattr(&h, cdiv, "id", "cautions");
    hel(&h, cdiv, "strong", "Cautions");
    xmlNodePtr cl = hel(&h, cdiv, "ul", NULL);
    for (size_t i = 0; i < nc; i++)
        hel(&h, cl, "li", cautions[i]);

    hel(&h, b, "h2", "Inputs");
    xmlNodePtr t = hel(&h, b, "table", NULL);
    const char *const rows[][2] = {
        {"patient", p->patient_name},
        {"patient ID", p->patient_id},
        {"plan", p->label},
        {"plan file", p->source},
        {"plan SOP Instance UID", p->sop_instance_uid},
        {"structure set", r->ss->source},
        {"structure set SOP Instance UID", r->ss->sop_instance_uid},
        {"model", r->model->source},
        {"machine", r->model->machine.name},
        {"model version", r->model->model_version},
        {"model SHA-256", r->model->sha256},
        {"action levels", r->levels->source},
        {"tool", "strayline " /* version appended below */},
    };
    for (size_t i = 0; i < sizeof rows / sizeof *rows; i++) {
        xmlNodePtr tr = hel(&h, t, "tr", NULL);
        hel(&h, tr, "th", rows[i][0]);
        if (i + 1 == sizeof rows / sizeof *rows)
            helf(&h, tr, "td", "strayline %s", sl_version());
        else
            hel(&h, tr, "td", rows[i][1] ? rows[i][1] : "-");
    }
    helf(&h, b, "p", "Marks: %s%s.", est_marks_legend(),
         r->nwhatifs ? "; [what-if] a what-if option changed this number" : "");
    /* the uncertainty budget of each organ's course maximum */
    hel(&h, b, "h3", "Uncertainty budget of the course maximum (cGy, k = 1)");
    xmlNodePtr ut = hel(&h, b, "table", NULL);
    const char *uhead[] = {"organ", "fit", "measurement", "interpolation", "extrapolation",
                           "stand-in", "tilt/SSD", "transfer", "setup shift", "combined"};
    hrow(&h, ut, true, uhead, 10);
    bool any_tps_max = false, any_elsewhere = false;
    for (size_t o = 0; o < e->norgans; o++) {
        const sl_organ_dose *d = &e->organs[o];
        if (!d->estimated)
            continue;
        xmlNodePtr tr = hel(&h, ut, "tr", NULL);
        double v[EST_NBUDGET];
        est_budget_values(&d->course_max_budget, v);
        if (d->max_from_tps) {
            /* no model budget: the planning system's stated uncertainty only */
            any_tps_max = true;
            helf(&h, tr, "td", "%s (planning system's dose)", d->roi->name);
            for (size_t i = 0; i + 1 < EST_NBUDGET; i++)
                hattr(&h, hel(&h, tr, "td", "-"), "class", "n");
            char x1[32];
            helf(&h, tr, "td", "%s (%.0f %%, from memory)", num(x1, sizeof x1, v[EST_NBUDGET - 1]),
                 100 * SL_TPS_U_FRACTION);
            continue;
        }
        if (d->upper_elsewhere) {
            any_elsewhere = true;
            helf(&h, tr, "td", "%s *", d->roi->name);
        } else {
            hel(&h, tr, "td", d->roi->name);
        }
        for (size_t i = 0; i < EST_NBUDGET; i++) {
            char x1[32];
            hattr(&h, hel(&h, tr, "td", num(x1, sizeof x1, v[i])), "class", "n");
        }
    }
    if (any_elsewhere)
        hel(&h, b, "p",
            "* The budget is the hottest sample's; the organ's upper bound is another "
            "sample's, higher (the uncertainty grows with distance from the field), so the "
            "u shown in the organ table is the one that bound implies, above this combined "
            "value.");
    if (any_tps_max)
        helf(&h, b, "p",
             "An organ whose maximum is the planning system's dose has no model budget: its "
             "uncertainty is the stated %.0f %% of that dose (k = 1), a value from memory.",
             100 * SL_TPS_U_FRACTION);
    hel(&h, b, "p",
        "Components add in quadrature at each beam and linearly over beams and fractions. "
        "Transfer: water tank to patient, beam direction and leakage asymmetry, by distance "
        "from the field edge (see the cautions for its source); stand-in: half the spread of "
        "the candidates for an uncommissioned cutout; tilt/SSD: a beam tilt or SSD beyond the "
        "commissioned ones (models/README.md).");
    xmlNodePtr ne = NULL;
    for (size_t o = 0; o < e->norgans; o++) {
        const sl_organ_dose *d = &e->organs[o];
        if (d->estimated)
            continue;
        if (!ne) {
            hel(&h, b, "h3", "Not estimated");
            ne = hel(&h, b, "ul", NULL);
        }
        helf(&h, ne, "li", "%s: %s", d->roi->name, d->excluded_why ? d->excluded_why : "-");
    }

    hel(&h, b, "h2", "Advice and risk statements");
    xmlNodePtr adv = hel(&h, b, "ul", NULL);
    bool any = false;
    for (size_t o = 0; o < e->norgans; o++) {
        const sl_assessment *a = &r->as->items[o];
        size_t s0 = a->verdict ? 1 : 0; /* the verdict before everything else */
        if (a->verdict)
            helf(&h, adv, "li", "%s: %s", a->dose->roi->name, a->statements.items[0]);
        for (size_t i = 0; i < a->advice.count; i++, any = true)
            helf(&h, adv, "li", "%s: %s", a->dose->roi->name, a->advice.items[i]);
        for (size_t i = s0; i < a->statements.count; i++, any = true)
            helf(&h, adv, "li", "%s: %s", a->dose->roi->name, a->statements.items[i]);
        for (size_t c = 0; c < a->nchecks; c++, any = true)
            helf(&h, adv, "li", "%s: %s, %.1f %s (%s; %s): %s", a->dose->roi->name,
                 a->checks[c].level->name,
                 est_unit_scale(a) * 100 * a->checks[c].level->dose_gy, est_unit(a),
                 a->checks[c].level->source, a->checks[c].level->mark,
                 a->checks[c].exceeded         ? "exceeded"
                 : a->checks[c].upper_exceeded ? "reached by the upper bound"
                                               : "not reached");
        if (a->status == SL_ST_BAND) {
            any = true;
            char shift[1200];
            est_pacing_text(r, a, shift, sizeof shift);
            helf(&h, adv, "li", "%s: risk bands of the %s (%s)%s", a->dose->roi->name,
                 a->kind->bands_source, a->kind->bands_mark, shift);
        }
        if (!isnan(a->lar_cases)) {
            any = true;
            helf(&h, adv, "li",
                 "%s: lifetime attributable risk of cancer incidence about %.2f per 100,000 for a "
                 "mean course dose of %.1f cGy (%s; %s; a population average, not an individual "
                 "prediction)",
                 a->dose->roi->name, a->lar_cases, a->lar_mean_cgy,
                 a->lar->source, a->lar->mark);
        }
    }
    if (!any)
        hel(&h, adv, "li", "none");

    for (size_t bi = 0; bi < e->nbeams; bi++) {
        const sl_beam_dose *bd = &e->beams[bi];
        const sl_beam_place *bp = bd->place;
        xmlNodePtr sec = hel(&h, b, "section", NULL);
        helf(&h, sec, "h2", "Beam %d '%s': %.0f MeV, applicator %s, insert %s", bp->beam->number,
             bp->beam->name ? bp->beam->name : "-", bd->energy_mev, bd->applicator, bd->insert);
        char ssd[96], obl[32];
        est_ssd_text(bd, ssd, sizeof ssd);
        est_obliquity_text(bd, obl, sizeof obl);
        snprintf(buf, sizeof buf,
                 "%.3f cGy/MU at dmax; %s; cutout factor %.3f%s; "
                 "field edge from the %s; gantry %.1f deg, collimator %.1f deg, couch %.1f deg; "
                 "surface obliquity %s",
                 bd->dose_per_mu_cgy, ssd, bd->cutout_factor,
                 bd->cutout_factor_assumed ? " (assumed)" : "",
                 sl_field_source_name(bp->field.source), bp->beam->gantry_deg,
                 bp->beam->collimator_deg, bp->beam->couch_deg, obl);
        hel(&h, sec, "p", buf);
        est_limits_text(bd, buf, sizeof buf);
        hel(&h, sec, "p", buf);
        for (size_t g = 0; g < e->ngroups; g++) {
            if (isfinite(bd->ref_cgy[g])) {
                char mu[32];
                if (isfinite(bd->mu[g]))
                    snprintf(mu, sizeof mu, "%.1f MU", bd->mu[g]);
                else
                    snprintf(mu, sizeof mu, "MU not in the plan");
                helf(&h, sec, "p",
                     "fraction group %d: %s; reference dose %.1f cGy a fraction at the "
                     "central-axis maximum%s; %d fractions",
                     p->groups[g].number, mu, bd->ref_cgy[g],
                     bd->reference_overridden ? " (set by option: what-if)" : "",
                     e->fractions[g]);
            }
        }
        hel(&h, sec, "h3", "Beam's-eye view");
        fig_bev_ctx bctx = {r, bi};
        fig_svg_into(&h, sec, 600, 420, fig_bev, &bctx);
        hel(&h, sec, "h3", "Dose against distance, at each judged organ's own depth");
        for (size_t o = 0; o < e->norgans; o++) {
            const sl_assessment *a = &r->as->items[o];
            if (!e->organs[o].estimated || !(a->flagged || a->nchecks))
                continue;
            fig_dd_ctx dctx = {r, bi, o};
            fig_svg_into(&h, sec, 560, 330, fig_dose_distance, &dctx);
        }
    }
    hel(&h, b, "h2", "Dose-volume histograms (cumulative, course estimate)");
    xmlNodePtr grid = hel(&h, b, "div", NULL);
    hattr(&h, grid, "class", "grid");
    for (size_t o = 0; o < e->norgans; o++) {
        const sl_organ_dose *d = &e->organs[o];
        if (!d->estimated || d->is_point || d->landmark || o >= r->loc->norgans)
            continue;
        fig_dvh_ctx vctx = {r, o};
        fig_svg_into(&h, grid, 270, 190, fig_dvh, &vctx);
    }

    sl_notes w = {0};
    est_warnings(r, &w);
    hel(&h, b, "h2", "Warnings");
    xmlNodePtr wl = hel(&h, b, "ul", NULL);
    for (size_t i = 0; i < w.count; i++)
        hel(&h, wl, "li", w.items[i]);
    if (!w.count)
        hel(&h, wl, "li", "none");
    sl_notes_free(&w);
    return hdoc_write(&h, fp, err);
}
