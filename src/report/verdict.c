/*
 * The verdict every estimate report opens with: which organs need attention
 * and why, which could not be judged, what was asked for and not found, and
 * the cautions that belong to this case. Text, JSON, CSV, HTML and PDF all
 * take these lines from here, so that every format says the same thing in
 * the same order; the generic cautions follow the result, never before it.
 *
 * Units are chosen here too: one unit a table (cGy for organs, mGy for a
 * fetus, as its guidance documents use), levels in the unit of the doses
 * beside them, fixed decimals and no exponent anywhere a person reads.
 */
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "estimate_common.h"

bool est_is_fetus(const sl_assessment *a)
{
    return a && a->kind && strcmp(a->kind->kind, "fetus") == 0;
}

double est_unit_scale(const sl_assessment *a)
{
    return est_is_fetus(a) ? 10.0 : 1.0;
}

const char *est_unit(const sl_assessment *a)
{
    return est_is_fetus(a) ? "mGy" : "cGy";
}

void est_num(double v, char *buf, size_t size)
{
    if (!isfinite(v))
        snprintf(buf, size, "-");
    else if (v > 0 && v < 0.05)
        snprintf(buf, size, "<0.1");
    else
        snprintf(buf, size, "%.1f", v);
}

void est_num_below(double v, double level, char *buf, size_t size)
{
    if (isfinite(v) && !(v > 0 && v < 0.05))
        snprintf(buf, size, "%.*f", sl_decimals_below(v, level, 1), v);
    else
        est_num(v, buf, size);
}

const char *est_vshape(const est_ventry *v)
{
    switch (v->kind) {
    case EST_V_ATTENTION: return v->a && v->a->status == SL_ST_EXCEEDS ? "\u25B2" : "\u25C6";
    case EST_V_MEASURE: return "\u25CF";
    default: return "?";
    }
}

const char *est_vkind_text(est_vkind k)
{
    switch (k) {
    case EST_V_ATTENTION: return "needs attention";
    case EST_V_MEASURE: return "measurement advised";
    case EST_V_NOT_JUDGED: return "not judged";
    case EST_V_NOT_FOUND: return "not found";
    }
    return "?";
}

const char *est_whatif_mark(const sl_estimate_report *r, const char *roi)
{
    for (size_t i = 0; i < r->nwhatifs; i++)
        if (!r->whatifs[i].roi || (roi && strcmp(r->whatifs[i].roi, roi) == 0))
            return " [what-if]";
    return "";
}

static const sl_whatif *whatif_for(const sl_estimate_report *r, const char *roi)
{
    for (size_t i = 0; i < r->nwhatifs; i++)
        if (!r->whatifs[i].roi || (roi && strcmp(r->whatifs[i].roi, roi) == 0))
            return &r->whatifs[i];
    return NULL;
}

static bool has_levels(const sl_assessment *a)
{
    return a->kind && (a->kind->nlevels > 0 || a->kind->nbands > 0);
}

/* The advice in one line, from the assessment's own fields (the full advice,
 * with its sources, is in the details). */
static void one_line_advice(const sl_assessment *a, est_vkind k, char *buf, size_t size)
{
    sl_buf b = {0};
    const sl_organ_dose *d = a->dose;
    if (k == EST_V_NOT_JUDGED && a->kind_unknown && a->unjudged_unknown) {
        sl_buf_printf(&b, "no kind of the action-level table matches its name, and its dose is "
                          "not known here (%s): give its kind with --organ ROI=KIND (other_organ "
                          "if it has no level)",
                      a->not_assessed_why ? a->not_assessed_why : "not assessed");
    } else if (k == EST_V_NOT_JUDGED && a->kind_unknown) {
        sl_buf_printf(&b, "no kind of the action-level table matches its name, and its upper "
                          "bound (%.1f cGy) reaches the table's lowest level (%.1f cGy): give "
                          "its kind with --organ ROI=KIND (other_organ if it has no level)",
                      d->course_max.upper_cgy + a->other_cgy, 100 * a->unjudged_level_gy);
    } else if (k == EST_V_NOT_JUDGED) {
        if (a->unjudged_level_gy > 0) {
            double s = est_unit_scale(a); /* cGy to the organ's unit */
            sl_buf_printf(&b, "the value shown (upper bound %.1f %s) reaches the level of %.1f "
                              "%s: check this organ's dose; ",
                          s * (d->course_max.upper_cgy + a->other_cgy), est_unit(a),
                          s * 100 * a->unjudged_level_gy, est_unit(a));
        }
        if (a->status == SL_ST_IN_FIELD)
            sl_buf_printf(&b, "in or touching the field: use the planning system's dose");
        else if (d->flags & SL_MF_NEAR_EDGE)
            sl_buf_printf(&b, "within 1 cm of the field edge: use the planning system's dose");
        else
            sl_buf_printf(&b, "%s: measure, or use the planning system's dose",
                          a->not_assessed_why ? a->not_assessed_why : "not assessed");
        if (a->type_not_organ)
            sl_buf_printf(&b, "; typed %s: if it is no %s, give --organ \"%s=other_organ\"",
                          d->roi->type, a->kind->kind, d->roi->name);
        if (a->incomplete)
            sl_buf_printf(&b, "; incomplete: other treatment beams not included (add their "
                              "dose with --other-dose)");
    } else {
        if (a->shield_advised)
            sl_buf_printf(&b, "shield: at least %.1f mm lead (or %.1f mm low-melting-point "
                              "alloy) over the organ for %.0f MeV",
                          a->lead_mm, a->alloy_mm, a->shield_energy_mev);
        else if (a->photon_dominated && a->flagged)
            sl_buf_printf(&b, "mostly photons (bremsstrahlung, leakage): a skin shield removes "
                              "little");
        if (a->status == SL_ST_BAND && a->band >= 1)
            sl_buf_printf(&b, "%sfollow the device protocol for band %d", b.len ? "; " : "",
                          a->band + 1);
        if (a->incomplete)
            sl_buf_printf(&b, "%sincomplete: other treatment beams not included (add their "
                              "dose with --other-dose)",
                          b.len ? "; " : "");
        if (a->measurement_advised)
            sl_buf_printf(&b, "%sconfirm by in-vivo measurement (TLD, OSL or diode)",
                          b.len ? "; " : "");
        if (!b.len)
            sl_buf_printf(&b, "review with a qualified medical physicist");
    }
    snprintf(buf, size, "%s", b.data && !b.failed ? b.data : "see the advice below");
    sl_buf_free(&b);
}

static const char *status_word(const sl_assessment *a, est_vkind k)
{
    if (k == EST_V_NOT_JUDGED && a->incomplete)
        return a->unjudged_level_gy > 0 ? "NOT JUDGED, REACHES LEVEL, INCOMPLETE"
                                        : "NOT JUDGED, INCOMPLETE";
    if (k == EST_V_NOT_JUDGED)
        return a->unjudged_level_gy > 0 ? "NOT JUDGED, REACHES LEVEL" : "NOT JUDGED";
    switch (a->status) {
    case SL_ST_EXCEEDS: return "EXCEEDS level";
    case SL_ST_MAY_EXCEED: return "MAY EXCEED level (upper bound)";
    case SL_ST_BAND: return "device risk band";
    default: break;
    }
    if (a->incomplete)
        return "INCOMPLETE";
    if (k == EST_V_MEASURE)
        return a->status == SL_ST_BELOW ? "below level, MEASURE" : "no action level, MEASURE";
    return sl_status_text(a->status);
}

static void fill_entry(const sl_estimate_report *r, const sl_assessment *a, est_vkind k,
                       est_ventry *v)
{
    memset(v, 0, sizeof *v);
    v->kind = k;
    v->a = a;
    v->cue = k == EST_V_ATTENTION ? (a->status == SL_ST_EXCEEDS ? "!!" : "!")
             : k == EST_V_MEASURE ? "M"
                                  : "?";
    sl_text_escape(a->dose->roi->name, v->organ, sizeof v->organ);
    char st[EST_STATUS_LEN];
    est_status_text(a, st, sizeof st);
    snprintf(v->status, sizeof v->status, "%s", status_word(a, k));
    if (a->status == SL_ST_BAND)
        snprintf(v->status, sizeof v->status, "%s", st);
    const sl_organ_dose *d = a->dose;
    double s = est_unit_scale(a);
    const char *u = est_unit(a);
    if (d->estimated && isfinite(d->course_max.cgy)) {
        /* what was judged: the estimate plus any dose given from elsewhere */
        char x[32], y[32], z[32];
        double lv = a->governing ? s * 100 * a->governing->dose_gy : NAN;
        est_num_below(s * (d->course_max.cgy + a->other_cgy), lv, x, sizeof x);
        est_num_below(s * (d->course_max.upper_cgy + a->other_cgy), lv, y, sizeof y);
        if (a->other_cgy > 0) {
            est_num(s * a->other_cgy, z, sizeof z);
            snprintf(v->dose, sizeof v->dose,
                     "course %s %s (upper bound %s %s), of which %s %s given by --other-dose",
                     x, u, y, u, z, u);
        } else {
            snprintf(v->dose, sizeof v->dose, "course %s %s (upper bound %s %s)", x, u, y, u);
        }
    }
    if (a->governing) {
        char x[32];
        est_num(s * 100 * a->governing->dose_gy, x, sizeof x);
        snprintf(v->level, sizeof v->level, "%s %s", x, u);
    } else if (a->unjudged_level_gy > 0) {
        /* not judged, but its value reaches this level: shown beside it */
        char x[32];
        est_num(s * 100 * a->unjudged_level_gy, x, sizeof x);
        snprintf(v->level, sizeof v->level, "%s %s", x, u);
    }
    v->whatif = whatif_for(r, a->dose->roi->name);
    char adv[sizeof v->advice];
    one_line_advice(a, k, adv, sizeof adv);
    if (v->whatif && v->whatif->roi)
        snprintf(v->advice, sizeof v->advice, "WITH THE WHAT-IF ABOVE: %s", adv);
    else
        snprintf(v->advice, sizeof v->advice, "%s", adv);
}

size_t est_verdict(const sl_estimate_report *r, est_ventry **out)
{
    const sl_assessments *as = r->as;
    size_t cap = as->n + as->missing.count + 1, n = 0;
    est_ventry *v = calloc(cap, sizeof *v);
    *out = v;
    if (!v)
        return 0;
    for (int pass = 0; pass < 3; pass++) {
        for (size_t i = 0; i < as->n; i++) {
            const sl_assessment *a = &as->items[i];
            /* the organs the assessment counted as not judged, and only
             * they, so that the verdict and organs_not_judged agree (one
             * also incomplete says so in its status and advice) */
            bool notj = (has_levels(a) || a->kind_unknown) && a->unjudged;
            est_vkind k;
            if (a->flagged && !notj)
                k = EST_V_ATTENTION;
            else if (notj)
                k = EST_V_NOT_JUDGED;
            else if (a->measurement_advised)
                k = EST_V_MEASURE;
            else
                continue;
            /* attention first, then measurement, then not judged */
            int order = k == EST_V_ATTENTION ? 0 : k == EST_V_MEASURE ? 1 : 2;
            if (order != pass)
                continue;
            fill_entry(r, a, k, &v[n++]);
        }
    }
    for (size_t i = 0; i < as->missing.count; i++) {
        est_ventry *e = &v[n++];
        memset(e, 0, sizeof *e);
        e->kind = EST_V_NOT_FOUND;
        e->cue = "?";
        const char *m = as->missing.items[i];
        const char *colon = strchr(m, ':');
        size_t len = colon ? (size_t)(colon - m) : strlen(m);
        snprintf(e->organ, sizeof e->organ, "%.*s", (int)len, m);
        snprintf(e->status, sizeof e->status, "NOT FOUND");
        snprintf(e->advice, sizeof e->advice, "%s", colon ? colon + 2 : m);
    }
    return n;
}

/* Bolus counted in depths moves every depth of its beam: say so, and say
 * when the beam did not name it (the plan may use it on other beams only). */
static void bolus_cautions(const sl_location *loc, sl_notes *out)
{
    for (size_t b = 0; loc && loc->depth_from_body && b < loc->nbeams; b++) {
        const sl_beam_place *bp = &loc->beams[b];
        if (!bp->boli_counted || bp->nboli == 0)
            continue;
        sl_buf names = {0};
        for (size_t i = 0; i < bp->nboli; i++) {
            char nm[160];
            sl_buf_printf(&names, "%s'%s'", i ? ", " : "",
                          sl_text_escape(bp->boli[i]->name, nm, sizeof nm));
        }
        const char *list = names.data && !names.failed ? names.data : "";
        if (bp->boli_from == SL_BOLUS_REFERENCED)
            sl_notes_add(out, "beam %d: bolus %s (named by the beam) is counted in the depths "
                              "as tissue on the skin (--no-bolus shows the difference)",
                         bp->beam->number, list);
        else
            sl_notes_add(out, "beam %d: the beam names no bolus, but %s %s typed BOLUS: counted "
                              "in the depths as tissue on the skin; check it is on for this "
                              "beam (--no-bolus shows the difference)",
                         bp->beam->number, list, bp->nboli > 1 ? "are" : "is");
        sl_buf_free(&names);
    }
}

void est_case_cautions(const sl_estimate_report *r, sl_notes *out)
{
    const sl_estimate *e = r->est;
    for (size_t b = 0; b < e->nbeams; b++) {
        const sl_beam_dose *bd = &e->beams[b];
        if (bd->model_flags & SL_MF_OPEN_FOR_CUTOUT)
            sl_notes_add(out, "beam %d: the cutout is not commissioned: a conservative "
                              "stand-in is used (it errs high); measure the cutout's profiles",
                         bd->place->beam->number);
        /* inputs that contradict each other, where the higher reading was
         * taken: said beside the result, not only among the warnings */
        if (bd->place->field.applicator_disagrees)
            sl_notes_add(out, "beam %d: the plan's applicator opening (%.1f x %.1f cm) and the "
                              "model's size of applicator %s (%.1f x %.1f cm) disagree: "
                              "distances from the larger; check the applicator",
                         bd->place->beam->number, bd->place->field.plan_opening_cm[0],
                         bd->place->field.plan_opening_cm[1], bd->applicator,
                         bd->place->field.model_opening_cm[0],
                         bd->place->field.model_opening_cm[1]);
        if (bd->reference_raised_from)
            sl_notes_add(out, "beam %d: its MU give %.1f %% less than the plan's %s implies: "
                              "the reference dose is raised to the plan's (the higher); check "
                              "the MU, the output or --prescription-isodose",
                         bd->place->beam->number, 100 * (1 - 1 / bd->reference_raised_by),
                         bd->reference_raised_from);
        if (bd->body_nearer)
            sl_notes_add(out, "beam %d: the body is nearer the source (SSD %.1f cm) than the "
                              "plan's SSD (%.1f cm): the inverse square takes the shorter; "
                              "check the SSD",
                         bd->place->beam->number, bd->isf_ssd_cm, bd->ssd_used_cm);
        if (bd->body_farther)
            sl_notes_add(out, "beam %d: the body is farther from the source (SSD %.1f cm) than "
                              "the plan's SSD (%.1f cm): the profiles are read at the longer; "
                              "check the SSD",
                         bd->place->beam->number, bd->ssd_used_cm, bd->isf_ssd_cm);
        if (bd->place->obliquity_deg > SL_OBLIQUITY_CAUTION_DEG)
            sl_notes_add(out, "beam %d: oblique incidence, surface obliquity %.1f deg (above "
                              "%.0f deg the depth dose itself changes): confirm by measurement",
                         bd->place->beam->number, bd->place->obliquity_deg,
                         SL_OBLIQUITY_CAUTION_DEG);
    }
    /* a model scaled by in-vivo evidence says so beside every beam it
     * scaled, with the evidence: nothing changes a model silently */
    for (size_t b = 0; r->model && b < e->nbeams; b++) {
        const sl_beam_dose *bd = &e->beams[b];
        const sl_model_scale *s = sl_model_find_scale(r->model, bd->energy_mev, bd->applicator);
        if (s)
            sl_notes_add(out, "beam %d: MODEL SCALED BY IN-VIVO EVIDENCE: the model's dose for "
                              "%g MeV, applicator %s is multiplied by %.4f (model version %s; %d "
                              "readings %s to %s, mean log ratio measured/estimated %.4f, 95 %% "
                              "interval %.4f to %.4f, t test p = %.2g; from %s)",
                         bd->place->beam->number, s->energy_mev, s->applicator, s->factor,
                         r->model->model_version, s->readings, s->first_date, s->last_date,
                         s->mean_log_ratio, s->ci_lo, s->ci_hi, s->p_value, s->source);
    }
    bolus_cautions(r->loc, out);
    if (est_pacing_assumed(r))
        sl_notes_add(out, "pacing dependence not stated: the cardiac device is judged as for a "
                          "pacing-dependent patient (the higher band); if the patient is not, "
                          "say so (--not-pacing-dependent)");
    static const struct {
        unsigned flag;
        const char *text;
    } kinds[] = {
        {SL_MF_EXTRAPOLATED, "outside the measured distances (held at least at the nearest "
                             "measured level)"},
        {SL_MF_DEPTH_OUTSIDE, "deeper or shallower than the commissioned depths (the nearest "
                              "commissioned depth is used)"},
        {SL_MF_POOR_FIT, "a profile used fits its points poorly (uncertainty widened)"},
        {SL_MF_TILT_OUTSIDE, "tilt not commissioned: the beam's tilt lies beyond the "
                             "commissioned tilts (the nearest is used, uncertainty widened)"},
        {SL_MF_SSD_OUTSIDE, "SSD not commissioned: beyond the commissioned SSDs (the nearest is "
                            "used, uncertainty widened, the upper bound never below the "
                            "nominal-SSD estimate)"},
        {SL_MF_INVIVO_SCALED, "scaled by in-vivo evidence: the model's dose times the in-vivo "
                              "scale factor (the upper bound never below the unscaled "
                              "estimate)"},
        {SL_MF_POINT_REACH, "given as a point: the upper bound covers the organ reaching nearer "
                            "the field from that point (give its point nearest the field, or "
                            "contour it)"},
    };
    for (size_t k = 0; k < sizeof kinds / sizeof kinds[0]; k++) {
        sl_buf b = {0};
        size_t n = 0;
        for (size_t o = 0; o < e->norgans; o++) {
            const sl_organ_dose *d = &e->organs[o];
            if (!d->estimated || !(d->flags & kinds[k].flag))
                continue;
            char nm[160];
            sl_buf_printf(&b, "%s%s", n++ ? ", " : "",
                          sl_text_escape(d->roi->name, nm, sizeof nm));
        }
        if (n && b.data && !b.failed)
            sl_notes_add(out, "%s: %s", kinds[k].text, b.data);
        sl_buf_free(&b);
    }
    if (r->plan && r->ss && r->ss->notes.count) {
        /* a mismatch allowed by option is said beside the result */
        for (size_t i = 0; i < r->ss->notes.count; i++)
            if (strstr(r->ss->notes.items[i], "allow-mismatch"))
                sl_notes_add(out, "%s", r->ss->notes.items[i]);
    }
}
