/*
 * `estimate` output in text, JSON and CSV. The JSON keys carry their units
 * and follow models/estimate-report.schema.json (a test validates every
 * demo report against it); CSV is written with libcsv's quoting.
 */
#include "strayline/report.h"
#include "strayline/version.h"

#include <csv.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "estimate_common.h"
#include "jsonw.h"

const unsigned est_flags[EST_NFLAGS] = {SL_MF_IN_FIELD,        SL_MF_DEPTH_OUTSIDE,
                                        SL_MF_EXTRAPOLATED,    SL_MF_OPEN_FOR_CUTOUT,
                                        SL_MF_POINTS_MODE,     SL_MF_POOR_FIT,
                                        SL_MF_NEAR_EDGE,       SL_MF_TILT_OUTSIDE,
                                        SL_MF_SSD_OUTSIDE,     SL_MF_INVIVO_SCALED,
                                        SL_MF_POINT_REACH};
const char *const est_flag_names[EST_NFLAGS] = {"in_field",
                                                "depth_outside_commissioned_range",
                                                "extrapolated",
                                                "standin_for_uncommissioned_cutout",
                                                "points_mode",
                                                "poor_fit",
                                                "near_field_edge",
                                                "tilt_not_commissioned",
                                                "ssd_not_commissioned",
                                                "scaled_by_invivo_evidence",
                                                "point_reach"};

/* short marks for the text table; the long ones are the model's flag texts */
static const char *const mark_short[EST_NFLAGS] = {NULL,         "[depth]",     "[extrapolated]",
                                                   "[stand-in]", NULL,          "[poor fit]",
                                                   "[near edge]", "[tilt]",      "[SSD]",
                                                   "[in-vivo scale]", "[point reach]"};

void est_marks(const sl_organ_dose *d, bool verbose, char *buf, size_t size)
{
    sl_buf b = {0};
    for (size_t i = 0; i < EST_NFLAGS; i++) {
        if ((d->flags & est_flags[i]) && mark_short[i])
            sl_buf_printf(&b, verbose ? " [%s]" : " %s",
                          verbose ? sl_model_flag_text(est_flags[i]) : mark_short[i]);
    }
    snprintf(buf, size, "%s", b.data && !b.failed ? b.data : "");
    sl_buf_free(&b);
}

const char *est_marks_legend(void)
{
    return "[extrapolated] outside the measured distances (held at least at the nearest "
           "measured level); [depth] deeper or shallower than the commissioned depths (nearest "
           "depth used); [stand-in] cutout not commissioned (largest of the open profiles from "
           "both edges and the commissioned inserts); [poor fit] a profile used fits its points "
           "poorly (uncertainty widened); [near edge] closer than 1 cm to the field edge: the "
           "planning system's dose is the reference, not judged; [tilt] tilt not commissioned "
           "(the beam's tilt lies beyond the commissioned tilts: nearest used, uncertainty "
           "widened); [SSD] SSD not commissioned (nearest used, uncertainty widened, the upper "
           "bound never below the nominal-SSD estimate); [in-vivo scale] the model's dose "
           "scaled by in-vivo evidence (the model file's in-vivo scale factor of that energy "
           "and applicator; the upper bound never below the unscaled estimate); [point reach] "
           "a device or fetus given as a point: its upper bound covers the organ reaching "
           "nearer the field from that point (3 cm for a device, half the fundal height for a "
           "fetus)";
}

const char *const est_budget_names[EST_NBUDGET] = {
    "fit", "measurement", "interpolation", "extrapolation",
    "standin", "tilt_ssd", "transfer", "setup_shift", "combined"};

void est_budget_values(const sl_budget *b, double out[EST_NBUDGET])
{
    double v[EST_NBUDGET] = {b->fit_cgy,         b->measurement_cgy, b->interpolation_cgy,
                             b->extrapolation_cgy, b->standin_cgy,   b->uncommissioned_cgy,
                             b->transfer_cgy,    b->setup_cgy,       b->combined_cgy};
    memcpy(out, v, sizeof v);
}

typedef struct short_text {
    char s[200];
} short_text;

/* "25 % below 5 cm, 40 % below 15 cm, ..., 100 % beyond" */
static short_text transfer_text(const sl_transfer *t)
{
    short_text r;
    sl_buf b = {0};
    for (size_t i = 0; i < t->nbands; i++) {
        if (isfinite(t->bands[i].below_cm))
            sl_buf_printf(&b, "%s%.0f %% below %g cm", i ? ", " : "",
                          100 * t->bands[i].relative, t->bands[i].below_cm);
        else
            sl_buf_printf(&b, "%s%.0f %% beyond", i ? ", " : "", 100 * t->bands[i].relative);
    }
    snprintf(r.s, sizeof r.s, "%s", b.data && !b.failed ? b.data : "");
    sl_buf_free(&b);
    return r;
}

size_t est_cautions(const sl_estimate_report *r, char out[][EST_CAUTION_LEN], size_t max)
{
    size_t n = 0;
    const sl_model *m = r->model;
    if (n < max && (m->machine.invented || m->notice))
        snprintf(out[n++], EST_CAUTION_LEN, "%s",
                 m->notice ? m->notice : "THE MODEL IS INVENTED DEMO DATA: NOT FOR CLINICAL USE");
    if (n < max)
        snprintf(out[n++], EST_CAUTION_LEN,
                 "SCREENING ESTIMATE: empirical models of one machine's out-of-field measurements "
                 "(model %s, machine %s, version %s, SHA-256 %.16s...). It is not a substitute "
                 "for measurement.",
                 m->source ? m->source : "-", m->machine.name, m->model_version, m->sha256);
    if (n < max)
        snprintf(out[n++], EST_CAUTION_LEN,
                 "Confirm high values by measurement (TLD, OSL or diode) before acting on them.");
    if (n < max)
        snprintf(out[n++], EST_CAUTION_LEN,
                 "Estimates outside the commissioned range (depths, distances, inserts) are marked "
                 "and carry extra uncertainty; the model is valid only for the machine it was "
                 "measured on.");
    {
        /* steep obliquity: the tilt the model interpolates in is no longer
         * the whole story, the depth dose itself changes */
        char list[300] = "";
        size_t len = 0, nb = 0;
        for (size_t b = 0; b < r->loc->nbeams && len + 40 < sizeof list; b++) {
            const sl_beam_place *bp = &r->loc->beams[b];
            if (!(bp->obliquity_deg > SL_OBLIQUITY_CAUTION_DEG))
                continue;
            len += (size_t)snprintf(list + len, sizeof list - len, "%sbeam %d (%.1f deg)",
                                    nb++ ? ", " : "", bp->beam->number, bp->obliquity_deg);
        }
        if (nb && n < max)
            snprintf(out[n++], EST_CAUTION_LEN,
                     "OBLIQUE INCIDENCE: the surface obliquity at the central axis of %s is "
                     "above %.0f deg, where the depth dose itself changes (common practice): "
                     "the model's tilt dimension does not cover it; confirm by measurement.",
                     list, SL_OBLIQUITY_CAUTION_DEG);
    }
    if (n < max && r->est->opt.ntps)
        snprintf(out[n++], EST_CAUTION_LEN,
                 "Within %.1f cm of a field edge (in the field too) each sample's dose is the "
                 "planning system's (its RT Dose given by --tps-dose), outside the field where "
                 "it is at least the model's; elsewhere the model's: each organ says which.",
                 r->est->opt.tps_zone_cm);
    else if (n < max)
        snprintf(out[n++], EST_CAUTION_LEN,
                 "Inside the field and at its edge the treatment planning system remains the "
                 "reference: organs there are not estimated.");
    if (n < max)
        snprintf(out[n++], EST_CAUTION_LEN,
                 "Action levels are screening levels with their sources, not prescriptions; "
                 "local protocols and a qualified medical physicist decide.");
    if (n < max)
        snprintf(out[n++], EST_CAUTION_LEN,
                 "Organs closer than %.0f cm to the field edge are marked [near edge] and not "
                 "judged: the planning system's dose is the reference there. Beyond a profile's "
                 "measured distances its value is held at least at the farthest measured level, "
                 "and nearer the edge than its first it rises on from that level (marked "
                 "[extrapolated]); "
                 "organs more than %.1f times the farthest measured "
                 "distance away are shown, not judged.",
                 SL_NEAR_EDGE_CM, SL_BEYOND_RANGE_FACTOR);
    if (n < max)
        snprintf(out[n++], EST_CAUTION_LEN,
                 "The uncertainty includes a transfer component (water tank to patient, beam "
                 "direction, leakage asymmetry) of %s; source: %s (%s)%s.",
                 transfer_text(&m->machine.transfer).s, m->machine.transfer.source,
                 m->machine.transfer.mark,
                 m->machine.transfer.is_default
                     ? "; the model file states none, so strayline's defaults apply"
                     : "");
    if (n < max && r->loc->depth_from_body)
        snprintf(out[n++], EST_CAUTION_LEN,
                 "Depths are water-equivalent path lengths through the body contour (no CT "
                 "densities); uncertainties are k = 1 with upper bounds at k = 2 and include a "
                 "%.1f cm setup shift.",
                 r->est->opt.setup_shift_cm);
    else if (n < max)
        snprintf(out[n++], EST_CAUTION_LEN,
                 "Every depth is set by option to %.2f cm (the body contour is not used); "
                 "uncertainties are k = 1 with upper bounds at k = 2 and include a %.1f cm setup "
                 "shift.",
                 r->loc->depth_cm, r->est->opt.setup_shift_cm);
    return n;
}

void est_warnings(const sl_estimate_report *r, sl_notes *out)
{
    sl_notes_extend(out, &r->plan->notes);
    sl_notes_extend(out, &r->ss->notes);
    sl_notes_extend(out, &r->loc->notes);
    for (size_t b = 0; b < r->loc->nbeams; b++)
        sl_notes_extend(out, &r->loc->beams[b].notes);
    sl_notes_extend(out, &r->est->notes);
    sl_notes_extend(out, &r->as->notes);
}

const char *est_tps_source(const sl_organ_dose *d)
{
    return d->tps_samples == 0              ? "model"
           : d->tps_volume_fraction >= 1.0 ? "planning system"
                                            : "planning system and model";
}

void est_tps_u_text(char *buf, size_t size)
{
    snprintf(buf, size,
             "The planning system's dose is given a standard uncertainty of %.0f %% of itself "
             "(k = 1; its upper bound is %.0f %% above it). This value is from memory: a few per "
             "cent near the field edge is the usual tolerance of electron dose calculation; it "
             "is stated, not measured for this planning system.",
             100 * SL_TPS_U_FRACTION, 200 * SL_TPS_U_FRACTION);
}

void est_tps_row_name(const sl_tps_ratio *t, char *buf, size_t size)
{
    if (t->beam_number)
        snprintf(buf, size, "beam %d", t->beam_number);
    else
        snprintf(buf, size, "every beam");
}

void est_tps_ratio_cells(const sl_tps_ratio *t, char cells[6][32])
{
    est_tps_row_name(t, cells[0], sizeof cells[0]);
    snprintf(cells[1], sizeof cells[1], "%.1f to %.1f", t->lo_cm, t->hi_cm);
    snprintf(cells[2], sizeof cells[2], "%zu", t->n);
    snprintf(cells[3], sizeof cells[3], "%.3f", t->mean);
    snprintf(cells[4], sizeof cells[4], "%.3f", t->min);
    snprintf(cells[5], sizeof cells[5], "%.3f", t->max);
}

void est_organ_dose_cells(const sl_estimate *e, const sl_organ_dose *d, const sl_assessment *a,
                          double s, est_dose_cells *c)
{
    char x[24], y[24];
    if (e->ngroups == 1) {
        est_num(s * d->fx_max[0].cgy, x, sizeof x);
        est_num(s * d->fx_max[0].upper_cgy, y, sizeof y);
        snprintf(c->fx, sizeof c->fx, "%s (%s)", x, y);
    } else {
        /* each fraction group's maximum a fraction, "group N: x (y)"; the
         * course maximum beside it is what is judged */
        size_t len = 0;
        c->fx[0] = '\0';
        for (size_t g = 0; g < e->ngroups; g++) {
            char one[80];
            est_num(s * d->fx_max[g].cgy, x, sizeof x);
            est_num(s * d->fx_max[g].upper_cgy, y, sizeof y);
            int k = snprintf(one, sizeof one, "%sgroup %d: %s (%s)", g ? "; " : "",
                             e->plan->groups[g].number, x, y);
            if (k < 0 || len + (size_t)k >= sizeof c->fx) {
                snprintf(c->fx, sizeof c->fx, "%zu groups: see the JSON", e->ngroups);
                break;
            }
            memcpy(c->fx + len, one, (size_t)k + 1);
            len += (size_t)k;
        }
    }
    /* an organ not judged whose value reaches a level shows that level, as
     * the verdict box does: the table is read on its own too */
    double lv = a->governing               ? s * 100 * a->governing->dose_gy
                : a->unjudged_level_gy > 0 ? s * 100 * a->unjudged_level_gy
                                           : NAN;
    est_num_below(s * d->course_max.cgy, lv, x, sizeof x);
    est_num_below(s * d->course_max.upper_cgy, lv, y, sizeof y);
    snprintf(c->course, sizeof c->course, "%s (%s)", x, y);
    est_num(s * d->course_mean.cgy, c->mean, sizeof c->mean);
    if (isfinite(lv))
        est_num(lv, c->level, sizeof c->level);
    else
        snprintf(c->level, sizeof c->level, a->status == SL_ST_BAND ? "bands" : "-");
}

const char est_unjudged_level_text[] =
    "not judged: the lowest level that applies to it, which its value or upper bound reaches";

const char *est_kind(const sl_assessment *a)
{
    return a->kind ? a->kind->kind : "-";
}

void est_qualifiers(const sl_assessment *a, char *buf, size_t size)
{
    sl_buf b = {0};
    if (a->governing && a->governing->single_exposure)
        sl_buf_printf(&b, "; single-exposure threshold; a fractionated course may act at lower "
                          "doses");
    if (a->neutron_unrated)
        sl_buf_printf(&b, "; a treatment beam may produce neutrons, which this table does not "
                          "rate: ACTION");
    if (a->incomplete)
        sl_buf_printf(&b, "; incomplete: other beams not included");
    if (a->other_cgy > 0 && a->dose->estimated)
        sl_buf_printf(&b, "; judged on course %.1f cGy (upper bound %.1f cGy): this estimate "
                          "plus %.1f cGy given by --other-dose",
                      a->dose->course_max.cgy + a->other_cgy,
                      a->dose->course_max.upper_cgy + a->other_cgy, a->other_cgy);
    else if (a->other_cgy > 0)
        sl_buf_printf(&b, "; includes %.1f cGy given by --other-dose", a->other_cgy);
    if (a->dose->landmark)
        sl_buf_printf(&b, "; geometry measured on the patient");
    /* the pregnancy documents speak mGy */
    if (a->kind && strcmp(a->kind->kind, "fetus") == 0 && a->dose->estimated) {
        double lv = a->governing ? 1000 * a->governing->dose_gy : NAN;
        double g = 10 * (a->dose->course_max.cgy + a->other_cgy),
               u = 10 * (a->dose->course_max.upper_cgy + a->other_cgy);
        sl_buf_printf(&b, "; fetal dose %.*f mGy (upper bound %.*f mGy)",
                      sl_decimals_below(g, lv, 1), g, sl_decimals_below(u, lv, 1), u);
    }
    snprintf(buf, size, "%s", b.failed || !b.data ? "" : b.data);
    sl_buf_free(&b);
}

void est_status_text(const sl_assessment *a, char *buf, size_t size)
{
    char q[EST_STATUS_LEN];
    est_qualifiers(a, q, sizeof q);
    if (a->status == SL_ST_BAND && a->kind) {
        const char *b = a->kind->bands[a->band].name;
        const char *bu = a->kind->bands[a->band_upper].name;
        bool action = a->band >= 1 || a->band_upper >= 1;
        if (a->band_upper > a->band)
            snprintf(buf, size, "%s risk band (upper bound: %s)%s%s", b, bu,
                     action ? ": ACTION" : "", q);
        else
            snprintf(buf, size, "%s risk band%s%s", b, action ? ": ACTION" : "", q);
        return;
    }
    if (a->kind_unknown) /* its status beside the verdict's */
        snprintf(buf, size, "NOT JUDGED: no kind matches its name%s", q);
    else
        snprintf(buf, size, "%s%s", sl_status_text(a->status), q);
}

void est_other_beam_text(const sl_other_beam *b, char *buf, size_t size)
{
    char en[32], mu[48], fx[32];
    if (isfinite(b->energy))
        snprintf(en, sizeof en, "%g %s", b->energy,
                 strcmp(b->radiation_type, "PHOTON") == 0 ? "MV" : "MeV");
    else
        snprintf(en, sizeof en, "energy unknown");
    if (isfinite(b->mu))
        snprintf(mu, sizeof mu, "%.1f MU a fraction", b->mu);
    else
        snprintf(mu, sizeof mu, "meterset not in the plan");
    if (b->fractions >= 0)
        snprintf(fx, sizeof fx, "%d fractions", b->fractions);
    else
        snprintf(fx, sizeof fx, "fractions unknown");
    snprintf(buf, size, "beam %d '%s': %s, %s, %s, %s: not estimated by this tool%s", b->number,
             b->name ? b->name : "-", b->radiation_type, en, mu, fx,
             b->neutron_producing ? " (may produce neutrons)" : "");
}

char *est_result_text(const sl_estimate_report *r)
{
    const sl_assessments *as = r->as;
    est_ventry *v = NULL;
    size_t n = est_verdict(r, &v);
    sl_buf b = {0};
    static const est_vkind order[] = {EST_V_ATTENTION, EST_V_MEASURE, EST_V_NOT_JUDGED,
                                      EST_V_NOT_FOUND};
    for (size_t k = 0; k < 4; k++) {
        size_t m = 0;
        for (size_t i = 0; i < n; i++)
            m += v[i].kind == order[k];
        if (!m)
            continue;
        if (order[k] == EST_V_ATTENTION)
            sl_buf_printf(&b, "%s%zu organ%s need%s attention: ", b.len ? "; " : "", m,
                          m == 1 ? "" : "s", m == 1 ? "s" : "");
        else
            sl_buf_printf(&b, "%s%s: ", b.len ? "; " : "", est_vkind_text(order[k]));
        size_t c = 0;
        for (size_t i = 0; i < n; i++) {
            if (v[i].kind != order[k])
                continue;
            if (order[k] == EST_V_ATTENTION)
                sl_buf_printf(&b, "%s%s (%s)", c++ ? ", " : "", v[i].organ, v[i].status);
            else
                sl_buf_printf(&b, "%s%s%s", c++ ? ", " : "", v[i].organ,
                              v[i].a && v[i].a->kind_unknown
                                  ? (v[i].a->unjudged_unknown
                                         ? " (no kind matches its name; its dose is not known "
                                           "here)"
                                         : " (no kind matches its name; its value reaches the "
                                           "table's lowest level)")
                              : v[i].a && v[i].a->unjudged_level_gy > 0
                                  ? " (its value shown reaches its level)"
                              : v[i].a && v[i].a->unjudged_unknown
                                  ? (v[i].a->status == SL_ST_IN_FIELD
                                         ? " (in the field: the planning system's dose applies)"
                                         : " (its place, and so its dose, unknown)")
                                  : "");
        }
    }
    size_t natt = 0, nreach = 0;
    for (size_t i = 0; i < n; i++) {
        natt += v[i].kind == EST_V_ATTENTION;
        nreach += v[i].kind == EST_V_NOT_JUDGED && v[i].a &&
                  (v[i].a->unjudged_level_gy > 0 || v[i].a->unjudged_unknown);
    }
    if (!b.len)
        sl_buf_printf(&b, "no organ reaches its action level at this screening");
    else if (!natt && !nreach)
        sl_buf_printf(&b, " (no judged organ reaches its action level)");

    if (as->nother)
        sl_buf_printf(&b, "; %zu treatment beam%s not estimated by this tool, %zu organ%s "
                          "incomplete",
                      as->nother, as->nother == 1 ? "" : "s", as->n_incomplete,
                      as->n_incomplete == 1 ? "" : "s");
    if (r->nwhatifs)
        sl_buf_printf(&b, "; WHAT-IF: %zu option%s change%s numbers away from the plan as "
                          "delivered",
                      r->nwhatifs, r->nwhatifs == 1 ? "" : "s", r->nwhatifs == 1 ? "s" : "");
    free(v);
    if (b.failed || !b.data) {
        sl_buf_free(&b);
        return NULL;
    }
    return b.data;
}

static const char *orq(const char *s)
{
    return s ? s : "-";
}

/* ------------------------------------------------------------- text -- */

/* One organ table in one unit: organs in cGy, or every fetus in mGy. */
static void text_table(FILE *fp, const sl_estimate_report *r, bool fetus)
{
    const sl_estimate *e = r->est;
    char nm[160];
    size_t shown = 0;
    for (size_t o = 0; o < e->norgans; o++) {
        const sl_organ_dose *d = &e->organs[o];
        const sl_assessment *a = &r->as->items[o];
        if (!d->estimated || est_is_fetus(a) != fetus)
            continue;
        const char *u = fetus ? "mGy" : "cGy";
        double s = fetus ? 10 : 1;
        if (!shown++) {
            fprintf(fp, "\n%s\n", fetus ? "fetus (mGy, the unit of its guidance documents):"
                                        : "organs (cGy):");
            fprintf(fp, "%-18s %-14s %8s %9s %19s %19s %9s %8s  %s\n", "organ", "kind",
                    "min dist", "depth", "max a fraction", "course max", "course", "level",
                    "status");
            char h1[32], h2[32], h3[32];
            snprintf(h1, sizeof h1, "%s (upper, k=2)", u);
            snprintf(h2, sizeof h2, "mean %s", u);
            snprintf(h3, sizeof h3, "%s", u);
            fprintf(fp, "%-18s %-14s %8s %9s %19s %19s %9s %8s\n", "", "", "cm", "cm", h1, h1,
                    h2, h3);
        }
        char depth[24], status[EST_STATUS_LEN];
        snprintf(depth, sizeof depth, "%.1f-%.1f", d->min_depth_cm, d->max_depth_cm);
        est_dose_cells c;
        est_organ_dose_cells(e, d, a, s, &c);
        est_status_text(a, status, sizeof status);
        char marks[96];
        est_marks(d, false, marks, sizeof marks);
        /* the name whole: two ROIs alike in their first characters must not
         * read as one (a longer name shifts its row, not its meaning) */
        /* several fraction groups: their maxima on a line of their own, so
         * that the columns stay in place */
        bool by_group = e->ngroups > 1;
        fprintf(fp, "%-18s %-14.14s %8.2f %9s %19s %19s %9s %8s  %s%s%s\n",
                sl_text_escape(d->roi->name, nm, sizeof nm), est_kind(a), d->min_distance_cm,
                depth, by_group ? "by group, below" : c.fx, c.course, c.mean, c.level, status,
                marks, est_whatif_mark(r, d->roi->name));
        if (by_group)
            fprintf(fp, "%-18s max a fraction, %s (upper, k=2): %s\n", "", u, c.fx);
    }
}

/* --tps-dose: where each organ's dose came from, and the two compared. */
static void text_tps(FILE *fp, const sl_estimate_report *r)
{
    const sl_estimate *e = r->est;
    fprintf(fp, "\nplanning system's dose: within %.1f cm of any field edge (the seam); the model "
                "beyond\n",
            e->tps_zone_cm);
    for (size_t o = 0; o < e->norgans; o++) {
        const sl_organ_dose *d = &e->organs[o];
        if (!d->estimated)
            continue;
        char nm[160];
        fprintf(fp, "  %-20s %5.1f %% of the volume from the planning system; maximum from the "
                    "%s, nearest point from the %s",
                sl_text_escape(d->roi->name, nm, sizeof nm), 100 * d->tps_volume_fraction,
                d->max_from_tps ? "planning system" : "model",
                d->nearest_from_tps ? "planning system" : "model");
        if (d->tps_outside_grid)
            fprintf(fp, "; %zu samples in the zone outside its grid (model)", d->tps_outside_grid);
        if (d->tps_below_model)
            fprintf(fp, "; %zu samples in the zone where the model is higher (model)",
                    d->tps_below_model);
        fputc('\n', fp);
    }
    char u[400];
    est_tps_u_text(u, sizeof u);
    fprintf(fp, "  %s\n", u);
    if (!e->nratios)
        return;
    fprintf(fp, "  model / planning system, course dose, by distance from the nearest field "
                "edge:\n  %-10s %-12s %8s %8s %8s %8s\n",
            "beam", "distance cm", "samples", "mean", "min", "max");
    for (size_t k = 0; k < e->nratios; k++) {
        const sl_tps_ratio *t = &e->ratios[k];
        char b[16];
        if (t->beam_number)
            snprintf(b, sizeof b, "%d", t->beam_number);
        else
            snprintf(b, sizeof b, "all");
        fprintf(fp, "  %-10s %4.1f - %-5.1f %8zu %8.3f %8.3f %8.3f\n", b, t->lo_cm, t->hi_cm, t->n,
                t->mean, t->min, t->max);
    }
}

static void text_report(FILE *fp, const sl_estimate_report *r)
{
    char nm[160]; /* a ROI name, control characters escaped */
    const sl_estimate *e = r->est;
    const sl_plan *p = r->plan;
    fprintf(fp, "strayline %s: out-of-field dose screening estimate\n", sl_version());
    fprintf(fp, "patient %s, ID %s (from the plan)\n", orq(p->patient_name), orq(p->patient_id));
    fprintf(fp, "plan %s (%s), structure set %s (%s)\n", orq(p->label), p->source,
            orq(r->ss->label), r->ss->source);
    const sl_patient *pt = &r->as->patient;
    /* weeks never rounded up into the next week: 7.99 weeks is in the 2 to 8
     * weeks' period, and printed "8.0" it would read as out of it */
    int dg = sl_decimals_below(pt->gestational_weeks, ceil(pt->gestational_weeks), 1),
        dc = sl_decimals_below(pt->conception_weeks, ceil(pt->conception_weeks), 1);
    if (!isnan(pt->gestational_weeks))
        fprintf(fp, "pregnant: gestational age %.*f weeks (since the last menstrual period), "
                    "about %.*f weeks after conception (the ICRP Publication 84 count)\n",
                dg, pt->gestational_weeks, dc, pt->conception_weeks);
    else if (!isnan(pt->conception_weeks))
        fprintf(fp, "pregnant: %.*f weeks after conception (given)\n", dc,
                pt->conception_weeks);
    if (pt->pacing_dependent && pt->pacing_stated)
        fprintf(fp, "pacing-dependent patient\n");
    else if (est_pacing_assumed(r))
        fprintf(fp, "pacing dependence not stated: a cardiac device is judged as for a "
                    "pacing-dependent patient\n");
    if (!isnan(pt->age_years))
        fprintf(fp, "age %.0f years (%s)\n", pt->age_years, pt->age_from ? pt->age_from : "given");
    if (pt->sex)
        fprintf(fp, "sex %c (%s)\n", pt->sex, pt->sex_from ? pt->sex_from : "given");
    fprintf(fp, "model %s: machine %s, version %s; action levels %s\n", orq(r->model->source),
            r->model->machine.name, r->model->model_version, orq(r->levels->source));
    char cautions[EST_MAX_CAUTIONS][EST_CAUTION_LEN];
    size_t nc = est_cautions(r, cautions, EST_MAX_CAUTIONS);
    fprintf(fp, "\n*** %s\n", cautions[0]);
    for (size_t i = 0; i < r->nwhatifs; i++)
        fprintf(fp, "*** WHAT-IF, NOT THE PLAN AS DELIVERED: %s\n", r->whatifs[i].text);

    /* the verdict first: every organ that needs attention, by name */
    char *res = est_result_text(r);
    fprintf(fp, "\nRESULT: %s\n", res ? res : EST_RESULT_FALLBACK);
    est_ventry *v = NULL;
    size_t nv = est_verdict(r, &v);
    for (size_t i = 0; i < nv; i++) {
        fprintf(fp, "  %-2s %-18s %s", v[i].cue, v[i].organ, v[i].status);
        if (v[i].dose[0])
            fprintf(fp, "; %s", v[i].dose);
        if (v[i].level[0])
            fprintf(fp, "; level %s", v[i].level);
        fprintf(fp, "%s\n     -> %s\n", v[i].whatif ? " [what-if]" : "", v[i].advice);
    }
    if (nv)
        fprintf(fp, "  (!! exceeds  ! may exceed or needs attention  M measure  ? not judged or "
                    "not found)\n");
    free(v);
    sl_notes cc = {0};
    est_case_cautions(r, &cc);
    for (size_t i = 0; i < cc.count; i++)
        fprintf(fp, "%s%s\n", i ? "  - " : "this case:\n  - ", cc.items[i]);
    sl_notes_free(&cc);

    text_table(fp, r, false);
    text_table(fp, r, true);
    bool any = false;
    for (size_t o = 0; o < e->norgans; o++) {
        const sl_organ_dose *d = &e->organs[o];
        if (d->estimated)
            continue;
        if (!any)
            fprintf(fp, "\nnot estimated:\n");
        any = true;
        fprintf(fp, "  %-18s %s\n", sl_text_escape(d->roi->name, nm, sizeof nm),
                orq(d->excluded_why));
    }
    for (size_t i = 0; i < r->as->missing.count; i++)
        fprintf(fp, "%s%s\n", i ? "  " : "\nnot found (asked for or expected):\n  ",
                r->as->missing.items[i]);
    fprintf(fp, "\nmarks: %s%s\n", est_marks_legend(),
            r->nwhatifs ? "; [what-if] a what-if option changed this number" : "");

    for (size_t b = 0; b < e->nbeams; b++) {
        const sl_beam_dose *bd = &e->beams[b];
        const sl_beam *be = bd->place->beam;
        fprintf(fp, "\nbeam %d '%s': %.0f MeV, applicator %s, insert %s%s\n", be->number,
                orq(be->name), bd->energy_mev, bd->applicator, bd->insert,
                bd->model_flags & SL_MF_OPEN_FOR_CUTOUT ? " (not commissioned: conservative stand-in; measure the cutout)"
                                                        : "");
        char ssd[96], lim[256];
        est_ssd_text(bd, ssd, sizeof ssd);
        est_limits_text(bd, lim, sizeof lim);
        fprintf(fp, "  %.3f cGy/MU, %s, cutout factor %.3f%s\n", bd->dose_per_mu_cgy, ssd,
                bd->cutout_factor, bd->cutout_factor_assumed ? " (assumed)" : "");
        fprintf(fp, "  %s\n", lim);
        for (size_t g = 0; g < e->ngroups; g++) {
            if (!isfinite(bd->ref_cgy[g]))
                continue;
            fprintf(fp, "  fraction group %d: ", p->groups[g].number);
            if (isfinite(bd->mu[g]))
                fprintf(fp, "%.1f MU, ", bd->mu[g]);
            else
                fprintf(fp, "MU not in the plan, ");
            fprintf(fp, "reference dose %.1f cGy a fraction at dmax%s x %d fractions\n",
                    bd->ref_cgy[g], bd->reference_overridden ? " (set by option: what-if)" : "",
                    e->fractions[g]);
        }
    }
    for (size_t i = 0; i < r->as->nother; i++) {
        char ob[400];
        est_other_beam_text(&r->as->other[i], ob, sizeof ob);
        fprintf(fp, "%s%s\n", i ? "  " : "\nother treatment beams (their dose is NOT in this "
                                          "estimate):\n  ",
                ob);
    }
    any = false;
    for (size_t o = 0; o < e->norgans; o++) {
        const sl_assessment *a = &r->as->items[o];
        /* every level checked is listed with its source and mark */
        if (a->advice.count == 0 && a->statements.count == 0 && isnan(a->lar_cases) &&
            a->nchecks == 0 && a->status != SL_ST_BAND)
            continue;
        if (!any)
            fprintf(fp, "\nadvice and risk statements:\n");
        any = true;
        fprintf(fp, "  %s:\n", sl_text_escape(a->dose->roi->name, nm, sizeof nm));
        size_t s0 = a->verdict ? 1 : 0; /* the verdict before everything else */
        if (a->verdict)
            fprintf(fp, "    - %s\n", a->statements.items[0]);
        for (size_t i = 0; i < a->advice.count; i++)
            fprintf(fp, "    - %s\n", a->advice.items[i]);
        for (size_t i = s0; i < a->statements.count; i++)
            fprintf(fp, "    - %s\n", a->statements.items[i]);
        if (!isnan(a->lar_cases))
            fprintf(fp, "    - lifetime attributable risk of cancer incidence: about %.2f cases "
                        "per 100,000 patients for a mean course dose of %.1f cGy (%s; %s; a "
                        "population average, not an individual prediction)\n",
                    a->lar_cases, a->lar_mean_cgy, a->lar->source, a->lar->mark);
        if (a->status == SL_ST_BAND) {
            char shift[1200];
            est_pacing_text(r, a, shift, sizeof shift);
            fprintf(fp, "    - risk bands: %s (%s)%s\n", a->kind->bands_source,
                    a->kind->bands_mark, shift);
        }
        double sc = est_unit_scale(a);
        for (size_t c = 0; c < a->nchecks; c++) {
            char lv[24];
            est_num(sc * 100 * a->checks[c].level->dose_gy, lv, sizeof lv);
            fprintf(fp, "    - %s: %s %s (%s; %s): %s\n", a->checks[c].level->name, lv,
                    est_unit(a), a->checks[c].level->source, a->checks[c].level->mark,
                    a->checks[c].exceeded         ? "exceeded"
                    : a->checks[c].upper_exceeded ? "reached by the upper bound"
                                                  : "not reached");
        }
    }
    if (r->est->tps_used)
        text_tps(fp, r);
    fprintf(fp, "\ncautions:\n");
    for (size_t i = 0; i < nc; i++)
        fprintf(fp, "  - %s\n", cautions[i]);
    sl_notes w = {0};
    est_warnings(r, &w);
    if (w.count)
        fprintf(fp, "\nwarnings:\n");
    for (size_t i = 0; i < w.count; i++)
        fprintf(fp, "  - %s\n", w.items[i]);
    sl_notes_free(&w);
    fprintf(fp, "\nRESULT: %s\n", res ? res : EST_RESULT_FALLBACK);
    free(res);
}

/* ------------------------------------------------------------- JSON -- */

static void put_stat(jw *w, json_object *o, const char *prefix, const sl_dose_stat *s)
{
    char k[64];
    snprintf(k, sizeof k, "%s_cgy", prefix);
    jw_num(w, o, k, s->cgy);
    snprintf(k, sizeof k, "%s_u_cgy", prefix);
    jw_num(w, o, k, s->u_cgy);
    snprintf(k, sizeof k, "%s_upper_cgy", prefix);
    jw_num(w, o, k, s->upper_cgy);
}

static json_object *notes_array(jw *w, const sl_notes *n)
{
    return jw_notes(w, n);
}

static json_object *json_report(jw *w, const sl_estimate_report *r)
{
    const sl_estimate *e = r->est;
    const sl_plan *p = r->plan;
    json_object *root = json_object_new_object();
    jw_str(w, root, "tool", "strayline");
    jw_str(w, root, "version", sl_version());
    jw_str(w, root, "report", "out-of-field dose screening estimate");
    jw_bool(w, root, "screening_estimate", true);
    char cautions[EST_MAX_CAUTIONS][EST_CAUTION_LEN];
    size_t nc = est_cautions(r, cautions, EST_MAX_CAUTIONS);
    json_object *ca = json_object_new_array();
    for (size_t i = 0; i < nc; i++)
        jw_append(w, ca, json_object_new_string(cautions[i]));
    jw_put(w, root, "cautions", ca);

    /* the verdict first, as in every format: who needs attention, what-ifs */
    json_object *res = json_object_new_object();
    char *rtext = est_result_text(r);
    jw_str(w, res, "text", rtext ? rtext : EST_RESULT_FALLBACK);
    free(rtext);
    jw_bool(w, res, "needs_attention", r->as->any_flagged);
    json_object *vl = json_object_new_array();
    est_ventry *ve = NULL;
    size_t nve = est_verdict(r, &ve);
    static const char *const vk[] = {"needs_attention", "measurement_advised", "not_judged",
                                     "not_found"};
    for (size_t i = 0; i < nve; i++) {
        json_object *x = json_object_new_object();
        jw_str(w, x, "organ", ve[i].a ? ve[i].a->dose->roi->name : ve[i].organ);
        jw_str(w, x, "verdict", vk[ve[i].kind]);
        jw_str(w, x, "status_text", ve[i].status);
        jw_str(w, x, "dose_text", ve[i].dose[0] ? ve[i].dose : NULL);
        jw_str(w, x, "level_text", ve[i].level[0] ? ve[i].level : NULL);
        jw_str(w, x, "advice", ve[i].advice);
        jw_bool(w, x, "what_if", ve[i].whatif != NULL);
        jw_append(w, vl, x);
    }
    free(ve);
    jw_put(w, res, "organs", vl);
    json_object *wl = json_object_new_array();
    static const char *const wk[] = {"shield", "measured_points", "reference_dose_by_hand",
                                     "depth_by_hand", "fetus_shift", "no_bolus"};
    for (size_t i = 0; i < r->nwhatifs; i++) {
        json_object *x = json_object_new_object();
        jw_str(w, x, "kind", wk[r->whatifs[i].kind]);
        jw_str(w, x, "roi", r->whatifs[i].roi);
        jw_str(w, x, "text", r->whatifs[i].text);
        jw_append(w, wl, x);
    }
    jw_put(w, res, "what_ifs", wl);
    jw_bool(w, res, "plan_as_delivered", r->nwhatifs == 0);
    sl_notes cc = {0};
    est_case_cautions(r, &cc);
    jw_put(w, res, "case_cautions", notes_array(w, &cc));
    sl_notes_free(&cc);
    jw_put(w, root, "result", res);

    json_object *in = json_object_new_object();
    json_object *po = json_object_new_object();
    jw_str(w, po, "file", p->source);
    jw_str(w, po, "sop_instance_uid", p->sop_instance_uid);
    jw_str(w, po, "label", p->label);
    jw_put(w, in, "plan", po);
    json_object *so = json_object_new_object();
    jw_str(w, so, "file", r->ss->source);
    jw_str(w, so, "sop_instance_uid", r->ss->sop_instance_uid);
    jw_str(w, so, "label", r->ss->label);
    jw_put(w, in, "structure_set", so);
    json_object *mo = json_object_new_object();
    jw_str(w, mo, "file", r->model->source);
    jw_str(w, mo, "sha256", r->model->sha256);
    jw_str(w, mo, "model_version", r->model->model_version);
    jw_str(w, mo, "machine", r->model->machine.name);
    jw_bool(w, mo, "invented", r->model->machine.invented);
    jw_str(w, mo, "notice", r->model->notice);
    jw_put(w, in, "model", mo);
    json_object *lo = json_object_new_object();
    jw_str(w, lo, "file", r->levels->source);
    jw_str(w, lo, "sha256", r->levels->sha256);
    jw_put(w, in, "action_levels", lo);
    jw_put(w, root, "inputs", in);

    const sl_patient *pt = &r->as->patient;
    json_object *pa = json_object_new_object();
    jw_str(w, pa, "id", p->patient_id);
    jw_str(w, pa, "name", p->patient_name);
    jw_num_opt(w, pa, "gestational_age_weeks", pt->gestational_weeks);
    jw_num_opt(w, pa, "weeks_after_conception", pt->conception_weeks);
    jw_str(w, pa, "age_source", pt->age_from);
    jw_str(w, pa, "sex_source", pt->sex_from);
    jw_bool(w, pa, "pacing_dependent", pt->pacing_dependent);
    jw_bool(w, pa, "pacing_dependence_stated", pt->pacing_stated);
    jw_num_opt(w, pa, "age_years", pt->age_years);
    char sex[2] = {pt->sex, 0};
    jw_str(w, pa, "sex", pt->sex ? sex : NULL);
    jw_put(w, root, "patient", pa);

    json_object *op = json_object_new_object();
    jw_num(w, op, "setup_shift_cm", e->opt.setup_shift_cm);
    jw_num_opt(w, op, "prescription_isodose_percent",
               isnan(e->opt.prescription_isodose) ? NAN : 100 * e->opt.prescription_isodose);
    jw_num_opt(w, op, "reference_dose_cgy", e->opt.reference_dose_cgy);
    jw_str(w, op, "evaluation", e->opt.mode == SL_EVAL_POINTS ? "measured points" : "fitted form");
    jw_str(w, op, "insert", e->opt.insert);
    jw_bool(w, op, "include_targets", e->opt.include_targets);
    json_object *sh = json_object_new_array();
    for (size_t i = 0; i < e->opt.nshields; i++) {
        json_object *x = json_object_new_object();
        jw_str(w, x, "roi", e->opt.shields[i].roi);
        jw_num(w, x, "electron_transmission", e->opt.shields[i].transmission);
        jw_append(w, sh, x);
    }
    jw_put(w, op, "shields", sh);
    jw_put(w, root, "options", op);

    json_object *groups = json_object_new_array();
    for (size_t g = 0; g < e->ngroups; g++) {
        json_object *x = json_object_new_object();
        jw_int(w, x, "number", p->groups[g].number);
        jw_int(w, x, "fractions", e->fractions[g]);
        jw_append(w, groups, x);
    }
    jw_put(w, root, "fraction_groups", groups);

    json_object *beams = json_object_new_array();
    for (size_t b = 0; b < e->nbeams; b++) {
        const sl_beam_dose *bd = &e->beams[b];
        const sl_beam_place *bp = bd->place;
        json_object *x = json_object_new_object();
        jw_int(w, x, "number", bp->beam->number);
        jw_str(w, x, "name", bp->beam->name);
        jw_num(w, x, "energy_mev", bd->energy_mev);
        jw_str(w, x, "applicator", bd->applicator);
        jw_str(w, x, "insert", bd->insert);
        jw_bool(w, x, "open_profiles_for_cutout", bd->model_flags & SL_MF_OPEN_FOR_CUTOUT);
        jw_num(w, x, "dose_per_mu_cgy", bd->dose_per_mu_cgy);
        jw_num_opt(w, x, "ssd_cm", bd->ssd_used_cm);
        jw_num(w, x, "inverse_square_factor", bd->isf);
        jw_num_opt(w, x, "inverse_square_ssd_cm", bd->isf_ssd_cm);
        jw_num(w, x, "cutout_factor", bd->cutout_factor);
        jw_bool(w, x, "cutout_factor_assumed", bd->cutout_factor_assumed);
        jw_bool(w, x, "reference_dose_overridden", bd->reference_overridden);
        jw_num(w, x, "reference_dose_raised_by", bd->reference_raised_by);
        jw_str(w, x, "reference_dose_raised_from", bd->reference_raised_from);
        json_object *mu = json_object_new_array(), *ref = json_object_new_array(),
                    *pbd = json_object_new_array();
        for (size_t g = 0; g < e->ngroups; g++) {
            jw_append(w, mu, isfinite(bd->mu[g]) ? jw_number(w, bd->mu[g], "mu") : NULL);
            jw_append(w, ref, isfinite(bd->ref_cgy[g]) ? jw_number(w, bd->ref_cgy[g], "ref") : NULL);
            jw_append(w, pbd, isfinite(bd->plan_beam_dose_cgy[g])
                                  ? jw_number(w, bd->plan_beam_dose_cgy[g], "beam dose")
                                  : NULL);
        }
        jw_put(w, x, "mu_per_fraction", mu);
        jw_put(w, x, "reference_dose_per_fraction_cgy", ref);
        jw_put(w, x, "plan_beam_dose_per_fraction_cgy", pbd);
        double lo_r, hi_r;
        sl_curves_range(bd->curves, &lo_r, &hi_r);
        json_object *range = json_object_new_array();
        jw_append(w, range, jw_number(w, lo_r, "range"));
        jw_append(w, range, jw_number(w, hi_r, "range"));
        jw_put(w, x, "commissioned_distance_range_cm", range);
        const double *dv;
        size_t nd = sl_curves_depths(bd->curves, &dv);
        json_object *depths = json_object_new_array();
        for (size_t k = 0; k < nd; k++)
            jw_append(w, depths, jw_number(w, dv[k], "depths"));
        jw_put(w, x, "commissioned_depths_cm", depths);
        size_t nt = sl_curves_tilts(bd->curves, &dv);
        json_object *tilts = json_object_new_array();
        for (size_t k = 0; k < nt; k++)
            jw_append(w, tilts, jw_number(w, dv[k], "tilts"));
        jw_put(w, x, "commissioned_tilts_deg", tilts);
        size_t ns = sl_curves_ssds(bd->curves, &dv);
        json_object *ssds = json_object_new_array();
        for (size_t k = 0; k < ns; k++)
            jw_append(w, ssds, jw_number(w, dv[k], "ssds"));
        jw_put(w, x, "commissioned_ssds_cm", ssds);
        jw_num_opt(w, x, "output_ssd_cm", bd->output_ssd_cm);
        jw_num_opt(w, x, "ssd_found_cm", bp->ssd_found_cm);
        jw_num_opt(w, x, "obliquity_deg", bp->obliquity_deg);
        jw_append(w, beams, x);
    }
    jw_put(w, root, "beams", beams);

    json_object *organs = json_object_new_array();
    for (size_t o = 0; o < e->norgans; o++) {
        const sl_organ_dose *d = &e->organs[o];
        const sl_assessment *a = &r->as->items[o];
        json_object *x = json_object_new_object();
        jw_str(w, x, "roi", d->roi->name);
        jw_int(w, x, "roi_number", d->roi->number);
        jw_str(w, x, "type", d->roi->type);
        jw_str(w, x, "kind", a->kind ? a->kind->kind : NULL);
        jw_str(w, x, "kind_source", a->kind ? (a->kind_by_option ? "option" : "name pattern") : NULL);
        jw_bool(w, x, "estimated", d->estimated);
        jw_str(w, x, "not_estimated_reason", d->estimated ? a->not_assessed_why : d->excluded_why);
        static const char *const codes[] = {"below_level", "may_exceed", "exceeds", "risk_band",
                                            "no_action_level", "in_field", "not_assessed"};
        jw_str(w, x, "status", codes[a->status]);
        char st[EST_STATUS_LEN];
        est_status_text(a, st, sizeof st);
        jw_str(w, x, "status_text", st);
        jw_bool(w, x, "flagged", a->flagged);
        jw_bool(w, x, "incomplete", a->incomplete);
        jw_num_opt(w, x, "other_dose_cgy", a->other_cgy > 0 ? a->other_cgy : NAN);
        /* what the status was judged on: the estimate plus any dose from
         * elsewhere (the keys of the scan summary, the log and history) */
        jw_num_opt(w, x, "judged_course_max_cgy",
                   d->estimated ? d->course_max.cgy + a->other_cgy : NAN);
        jw_num_opt(w, x, "judged_course_max_upper_cgy",
                   d->estimated ? d->course_max.upper_cgy + a->other_cgy : NAN);
        jw_bool(w, x, "geometry_measured_on_patient", d->landmark);
        if (e->tps_used && d->estimated) { /* where its dose came from (--tps-dose) */
            jw_str(w, x, "dose_source", est_tps_source(d));
            jw_num(w, x, "planning_system_volume_fraction", d->tps_volume_fraction);
            jw_bool(w, x, "max_from_planning_system", d->max_from_tps);
            jw_bool(w, x, "nearest_from_planning_system", d->nearest_from_tps);
            jw_int(w, x, "zone_samples_outside_planning_grid", (long long)d->tps_outside_grid);
            jw_int(w, x, "zone_samples_model_higher", (long long)d->tps_below_model);
            jw_int(w, x, "zone_samples_far_fields_model_added", (long long)d->tps_far_model);
        }
        jw_num(w, x, "volume_cc", d->volume_cc);
        jw_bool(w, x, "point", d->is_point);
        jw_num_opt(w, x, "min_distance_cm", isfinite(d->min_distance_cm) ? d->min_distance_cm : NAN);
        jw_num_opt(w, x, "min_depth_cm", isfinite(d->min_depth_cm) ? d->min_depth_cm : NAN);
        jw_num_opt(w, x, "max_depth_cm", isfinite(d->max_depth_cm) ? d->max_depth_cm : NAN);
        if (d->estimated) {
            jw_num(w, x, "nearmax_volume_cc", d->nearmax_volume_cc);
            put_stat(w, x, "course_max", &d->course_max);
            /* the bound is another sample's, higher than the hottest one's
             * (its budget below is the hottest sample's) */
            jw_bool(w, x, "course_max_upper_from_other_sample", d->upper_elsewhere);
            put_stat(w, x, "course_mean", &d->course_mean);
            put_stat(w, x, "course_nearmax", &d->course_nearmax);
            put_stat(w, x, "course_nearest", &d->course_nearest);
            json_object *fx = json_object_new_array();
            for (size_t g = 0; g < e->ngroups; g++) {
                json_object *f = json_object_new_object();
                jw_int(w, f, "fraction_group", p->groups[g].number);
                put_stat(w, f, "max", &d->fx_max[g]);
                put_stat(w, f, "mean", &d->fx_mean[g]);
                put_stat(w, f, "nearmax", &d->fx_nearmax[g]);
                put_stat(w, f, "nearest", &d->fx_nearest[g]);
                jw_append(w, fx, f);
            }
            jw_put(w, x, "per_fraction", fx);
            jw_num(w, x, "electron_fraction", d->electron_fraction);
            jw_num(w, x, "electron_transmission", d->shield_transmission);
            if (d->landmark) { /* measured on the patient: no coordinates */
                jw_put(w, x, "hottest_point_cm", NULL);
            } else {
                const sl_vec3 *pmax = &r->loc->samples[o].points[d->max_sample];
                json_object *pm = json_object_new_array();
                jw_append(w, pm, jw_number(w, pmax->x, "hottest_point_cm"));
                jw_append(w, pm, jw_number(w, pmax->y, "hottest_point_cm"));
                jw_append(w, pm, jw_number(w, pmax->z, "hottest_point_cm"));
                jw_put(w, x, "hottest_point_cm", pm);
            }
        }
        if (d->estimated) {
            json_object *bg = json_object_new_object();
            double v[EST_NBUDGET];
            est_budget_values(&d->course_max_budget, v);
            for (size_t i = 0; i < EST_NBUDGET; i++) {
                char key[64];
                snprintf(key, sizeof key, "%s_cgy", est_budget_names[i]);
                jw_num(w, bg, key, v[i]);
            }
            jw_put(w, x, "course_max_uncertainty_budget", bg);
        }
        json_object *flags = json_object_new_array();
        for (size_t i = 0; i < EST_NFLAGS; i++) {
            if (d->flags & est_flags[i])
                jw_append(w, flags, json_object_new_string(est_flag_names[i]));
        }
        jw_put(w, x, "flags", flags);
        jw_bool(w, x, "what_if", est_whatif_mark(r, d->roi->name)[0] != '\0');
        if (a->governing) {
            json_object *lv = json_object_new_object();
            jw_str(w, lv, "name", a->governing->name);
            jw_num(w, lv, "dose_gy", a->governing->dose_gy);
            jw_str(w, lv, "source", a->governing->source);
            jw_str(w, lv, "mark", a->governing->mark);
            jw_put(w, x, "level", lv);
        } else {
            jw_put(w, x, "level", NULL);
        }
        /* not judged, and its value or upper bound reaches this level (the
         * lowest that applies to it): shown, never a verdict */
        jw_num_opt(w, x, "unjudged_level_cgy",
               a->unjudged_level_gy > 0 ? 100 * a->unjudged_level_gy : NAN);
        json_object *checks = json_object_new_array();
        for (size_t c = 0; c < a->nchecks; c++) {
            json_object *lv = json_object_new_object();
            jw_str(w, lv, "name", a->checks[c].level->name);
            jw_num(w, lv, "dose_gy", a->checks[c].level->dose_gy);
            jw_str(w, lv, "source", a->checks[c].level->source);
            jw_str(w, lv, "mark", a->checks[c].level->mark);
            jw_bool(w, lv, "exceeded", a->checks[c].exceeded);
            jw_bool(w, lv, "upper_exceeded", a->checks[c].upper_exceeded);
            jw_append(w, checks, lv);
        }
        jw_put(w, x, "levels", checks);
        if (a->status == SL_ST_BAND) {
            json_object *bo = json_object_new_object();
            jw_str(w, bo, "name", a->kind->bands[a->band].name);
            jw_str(w, bo, "by_upper_bound", a->kind->bands[a->band_upper].name);
            jw_bool(w, bo, "pacing_dependent_shift", a->pacing_raised);
            jw_bool(w, bo, "raised_for_neutrons", a->neutron_band);
            jw_str(w, bo, "source", a->kind->bands_source);
            jw_str(w, bo, "mark", a->kind->bands_mark);
            jw_str(w, bo, "table_file", r->levels->source);
            jw_put(w, x, "band", bo);
        } else {
            jw_put(w, x, "band", NULL);
        }
        if (a->shield_advised) {
            json_object *s = json_object_new_object();
            jw_num(w, s, "lead_mm", a->lead_mm);
            jw_num(w, s, "low_melting_alloy_mm", a->alloy_mm);
            jw_num(w, s, "energy_mev", a->shield_energy_mev);
            jw_put(w, x, "shield", s);
        } else {
            jw_put(w, x, "shield", NULL);
        }
        jw_bool(w, x, "photon_dominated", a->photon_dominated);
        jw_bool(w, x, "measurement_advised", a->measurement_advised);
        jw_put(w, x, "advice", notes_array(w, &a->advice));
        jw_put(w, x, "statements", notes_array(w, &a->statements));
        jw_num_opt(w, x, "lifetime_risk_cases_per_100000", a->lar_cases);
        jw_str(w, x, "lifetime_risk_source", a->lar && !isnan(a->lar_cases) ? a->lar->source : NULL);
        jw_append(w, organs, x);
    }
    jw_put(w, root, "organs", organs);
    jw_bool(w, root, "any_flagged", r->as->any_flagged);
    jw_int(w, root, "organs_not_judged", (long long)r->as->n_unjudged);
    json_object *ob = json_object_new_array();
    for (size_t i = 0; i < r->as->nother; i++) {
        const sl_other_beam *b = &r->as->other[i];
        json_object *bo = json_object_new_object();
        jw_int(w, bo, "number", b->number);
        jw_str(w, bo, "name", b->name);
        jw_str(w, bo, "radiation_type", b->radiation_type);
        /* DICOM's Nominal Beam Energy: MV for photons, MeV otherwise */
        bool photon = strcmp(b->radiation_type, "PHOTON") == 0;
        jw_num_opt(w, bo, "nominal_energy_mv", photon ? b->energy : NAN);
        jw_num_opt(w, bo, "nominal_energy_mev", photon ? NAN : b->energy);
        jw_num_opt(w, bo, "mu_per_fraction", b->mu);
        if (b->fractions >= 0)
            jw_int(w, bo, "fractions", b->fractions);
        else
            jw_put(w, bo, "fractions", NULL);
        jw_bool(w, bo, "may_produce_neutrons", b->neutron_producing);
        jw_str(w, bo, "status", "not estimated by this tool");
        jw_append(w, ob, bo);
    }
    jw_put(w, root, "other_treatment_beams", ob);
    if (e->tps_used) {
        json_object *tp = json_object_new_object();
        json_object *files = json_object_new_array();
        for (size_t f = 0; f < e->opt.ntps; f++)
            jw_append(w, files, json_object_new_string(e->opt.tps[f]->source));
        jw_put(w, tp, "files", files);
        jw_num(w, tp, "zone_cm", e->tps_zone_cm);
        jw_num(w, tp, "u_fraction_k1", SL_TPS_U_FRACTION);
        char u[400];
        est_tps_u_text(u, sizeof u);
        jw_str(w, tp, "u_basis", u);
        json_object *rows = json_object_new_array();
        for (size_t k = 0; k < e->nratios; k++) {
            const sl_tps_ratio *t = &e->ratios[k];
            json_object *ro = json_object_new_object();
            if (t->beam_number)
                jw_int(w, ro, "beam_number", t->beam_number);
            else
                jw_put(w, ro, "beam_number", NULL); /* every beam together */
            jw_num(w, ro, "from_cm", t->lo_cm);
            jw_num(w, ro, "to_cm", t->hi_cm);
            jw_int(w, ro, "samples", (long long)t->n);
            jw_num(w, ro, "ratio_mean", t->mean);
            jw_num(w, ro, "ratio_min", t->min);
            jw_num(w, ro, "ratio_max", t->max);
            jw_append(w, rows, ro);
        }
        jw_put(w, tp, "model_to_planning_system", rows);
        jw_put(w, root, "planning_system_dose", tp);
    }
    jw_int(w, root, "organs_incomplete", (long long)r->as->n_incomplete);
    jw_put(w, root, "organs_not_found", jw_notes(w, &r->as->missing));
    sl_notes all = {0};
    est_warnings(r, &all);
    jw_put(w, root, "warnings", jw_notes(w, &all));
    sl_notes_free(&all);
    return root;
}

/* -------------------------------------------------------------- CSV -- */

static void csv_field(FILE *fp, const char *s, bool last)
{
    csv_fwrite(fp, s, strlen(s));
    fputc(last ? '\n' : ',', fp);
}

static void csv_num(FILE *fp, double v, bool last)
{
    char buf[32] = "";
    if (isfinite(v))
        snprintf(buf, sizeof buf, "%.4f", v);
    csv_field(fp, buf, last);
}

/* The planning system's columns of one organ's row (d NULL: an organ not
 * found): where its dose came from, and the plan's comparison model /
 * planning system repeated in every row as the plan's other facts are (the
 * mean ratio of every beam together per 1 cm bin, and every row of the
 * table in one cell). All empty without --tps-dose. */
static void csv_tps(FILE *fp, const sl_estimate *e, const sl_organ_dose *d, sl_buf *table)
{
    bool own = e->tps_used && d && d->estimated;
    csv_field(fp, own ? est_tps_source(d) : "", false);
    csv_num(fp, own ? 100 * d->tps_volume_fraction : NAN, false);
    csv_field(fp, own ? (d->max_from_tps ? "planning system" : "model") : "", false);
    csv_field(fp, own ? (d->nearest_from_tps ? "planning system" : "model") : "", false);
    bool any = own && d->tps_samples > 0;
    csv_num(fp, any ? 100 * SL_TPS_U_FRACTION : NAN, false);
    char u[400] = "";
    if (any)
        est_tps_u_text(u, sizeof u);
    csv_field(fp, u, false);
    csv_num(fp, e->tps_used ? e->tps_zone_cm : NAN, false);
    for (size_t k = 0; k < SL_TPS_BINS; k++) {
        double v = NAN;
        for (size_t i = 0; i < e->nratios; i++)
            if (e->ratios[i].beam_number == 0 &&
                fabs(e->ratios[i].lo_cm - (double)k * SL_TPS_BAND_CM / SL_TPS_BINS) < 1e-9)
                v = e->ratios[i].mean;
        csv_num(fp, v, false);
    }
    csv_field(fp, table->data ? table->data : "", false);
}

/* The comparison table in one cell: "every beam 0.0-1.0 cm: mean 1.234,
 * min 1.100, max 1.400, 40 samples | beam 1 ..." */
static void tps_table_text(const sl_estimate *e, sl_buf *b)
{
    for (size_t i = 0; i < e->nratios; i++) {
        const sl_tps_ratio *t = &e->ratios[i];
        char name[32];
        est_tps_row_name(t, name, sizeof name);
        sl_buf_printf(b, "%s%s %.1f-%.1f cm: mean %.3f, min %.3f, max %.3f, %zu samples",
                      i ? " | " : "", name, t->lo_cm, t->hi_cm, t->mean, t->min, t->max, t->n);
    }
}

/* One tidy table: a row an organ (those asked for and not found too), the
 * same columns in every row, the patient, plan and model in columns, and
 * the cautions and warnings in a column of their own, so that Python's csv,
 * R's read.csv and a spreadsheet load it as it is. */
static sl_status csv_report(FILE *fp, const sl_estimate_report *r, sl_error *err)
{
    static const char *const head[] = {
        "patient_id", "plan_label", "plan_uid", "structure_set_uid", "model_file",
        "model_version", "model_sha256", "roi", "kind", "verdict", "status", "flagged",
        "measurement_advised", "what_if", "min_distance_cm", "min_depth_cm", "max_depth_cm",
        "volume_cc", "fraction_max_cgy", "fraction_max_upper_cgy",
        "fraction_max_by_group_cgy", "course_max_cgy",
        "course_max_upper_cgy", "course_mean_cgy", "course_mean_upper_cgy",
        "course_nearmax_cgy", "course_nearest_cgy", "level_cgy", "level_source", "flags",
        "dose_source", "planning_system_volume_percent", "max_dose_source",
        "nearest_point_dose_source", "planning_system_u_k1_percent", "planning_system_u_basis",
        "planning_system_zone_cm", "model_to_planning_system_0_1_cm",
        "model_to_planning_system_1_2_cm", "model_to_planning_system_2_3_cm",
        "model_to_planning_system_3_4_cm", "model_to_planning_system_4_5_cm",
        "model_to_planning_system_by_beam", "not_estimated_reason", "advice", "cautions"};
    size_t nh = sizeof head / sizeof *head;
    for (size_t i = 0; i < nh; i++)
        csv_field(fp, head[i], i + 1 == nh);
    const sl_estimate *e = r->est;
    const sl_plan *p = r->plan;

    /* the report's cautions, warnings, what-ifs and limits, one cell */
    sl_buf cb = {0};
    char *res = est_result_text(r);
    sl_buf_printf(&cb, "RESULT: %s", res ? res : EST_RESULT_FALLBACK);
    free(res);
    for (size_t i = 0; i < r->nwhatifs; i++)
        sl_buf_printf(&cb, " | WHAT-IF: %s", r->whatifs[i].text);
    sl_notes cc = {0};
    est_case_cautions(r, &cc);
    for (size_t i = 0; i < cc.count; i++)
        sl_buf_printf(&cb, " | %s", cc.items[i]);
    sl_notes_free(&cc);
    for (size_t i = 0; i < r->as->nother; i++) {
        char ob[400];
        est_other_beam_text(&r->as->other[i], ob, sizeof ob);
        sl_buf_printf(&cb, " | %s", ob);
    }
    for (size_t b = 0; b < e->nbeams; b++) {
        char lim[256];
        est_limits_text(&e->beams[b], lim, sizeof lim);
        sl_buf_printf(&cb, " | beam %d: %s", e->beams[b].place->beam->number, lim);
    }
    char cautions[EST_MAX_CAUTIONS][EST_CAUTION_LEN];
    size_t nc = est_cautions(r, cautions, EST_MAX_CAUTIONS);
    for (size_t i = 0; i < nc; i++)
        sl_buf_printf(&cb, " | %s", cautions[i]);
    sl_notes w = {0};
    est_warnings(r, &w);
    for (size_t i = 0; i < w.count; i++)
        sl_buf_printf(&cb, " | warning: %s", w.items[i]);
    sl_notes_free(&w);
    if (cb.failed || !cb.data) {
        sl_buf_free(&cb);
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    }
    sl_buf tt = {0};
    tps_table_text(e, &tt);
    if (tt.failed) {
        sl_buf_free(&cb);
        sl_buf_free(&tt);
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    }
    est_ventry *ve = NULL;
    size_t nve = est_verdict(r, &ve);

    for (size_t o = 0; o < e->norgans + r->as->missing.count; o++) {
        csv_field(fp, orq(p->patient_id), false);
        csv_field(fp, orq(p->label), false);
        csv_field(fp, p->sop_instance_uid, false);
        csv_field(fp, r->ss->sop_instance_uid, false);
        csv_field(fp, orq(r->model->source), false);
        csv_field(fp, r->model->model_version, false);
        csv_field(fp, r->model->sha256, false);
        if (o >= e->norgans) { /* asked for and not found: a row with empty numbers */
            const est_ventry *v = NULL;
            size_t k = o - e->norgans, seen = 0;
            for (size_t i = 0; i < nve; i++)
                if (ve[i].kind == EST_V_NOT_FOUND && seen++ == k)
                    v = &ve[i];
            csv_field(fp, v ? v->organ : "-", false);
            csv_field(fp, v ? v->organ : "-", false);
            csv_field(fp, "not_found", false);
            csv_field(fp, "not found", false);
            csv_field(fp, "yes", false);
            csv_field(fp, "yes", false);
            csv_field(fp, "no", false);
            for (size_t c = 0; c < 13; c++) {
                if (c == 6)
                    csv_field(fp, "", false); /* by group */
                else
                    csv_num(fp, NAN, false);
            }
            csv_field(fp, "", false);
            csv_field(fp, "", false);
            csv_tps(fp, e, NULL, &tt);
            csv_field(fp, r->as->missing.items[k], false);
            csv_field(fp, v ? v->advice : "", false);
            csv_field(fp, cb.data, true);
            continue;
        }
        const sl_organ_dose *d = &e->organs[o];
        const sl_assessment *a = &r->as->items[o];
        char st[EST_STATUS_LEN], flags[160] = "";
        est_status_text(a, st, sizeof st);
        for (size_t i = 0; i < EST_NFLAGS; i++) {
            if (d->flags & est_flags[i]) {
                strncat(flags, flags[0] ? ";" : "", sizeof flags - strlen(flags) - 1);
                strncat(flags, est_flag_names[i], sizeof flags - strlen(flags) - 1);
            }
        }
        const char *verdict = "ok";
        const char *advice = "";
        static const char *const vk[] = {"needs_attention", "measurement_advised",
                                         "not_judged", "not_found"};
        for (size_t i = 0; i < nve; i++)
            if (ve[i].a == a) {
                verdict = vk[ve[i].kind];
                advice = ve[i].advice;
            }
        if (!d->estimated && strcmp(verdict, "ok") == 0)
            verdict = "not_estimated";
        bool est = d->estimated;
        csv_field(fp, d->roi->name, false);
        csv_field(fp, est_kind(a), false);
        csv_field(fp, verdict, false);
        csv_field(fp, st, false);
        csv_field(fp, a->flagged ? "yes" : "no", false);
        csv_field(fp, a->measurement_advised ? "yes" : "no", false);
        csv_field(fp, est_whatif_mark(r, d->roi->name)[0] ? "yes" : "no", false);
        csv_num(fp, d->min_distance_cm, false);
        csv_num(fp, d->min_depth_cm, false);
        csv_num(fp, d->max_depth_cm, false);
        csv_num(fp, d->volume_cc, false);
        csv_num(fp, est && e->ngroups == 1 ? d->fx_max[0].cgy : NAN, false);
        csv_num(fp, est && e->ngroups == 1 ? d->fx_max[0].upper_cgy : NAN, false);
        /* with several fraction groups a fraction has no one dose: each
         * group's maximum per fraction and its upper bound, in one cell */
        sl_buf fg = {0};
        for (size_t g = 0; est && g < e->ngroups; g++)
            sl_buf_printf(&fg, "%sgroup %d: %.4f (%.4f)", g ? "; " : "",
                          e->plan->groups[g].number, d->fx_max[g].cgy, d->fx_max[g].upper_cgy);
        csv_field(fp, fg.data && !fg.failed ? fg.data : "", false);
        sl_buf_free(&fg);
        csv_num(fp, est ? d->course_max.cgy : NAN, false);
        csv_num(fp, est ? d->course_max.upper_cgy : NAN, false);
        csv_num(fp, est ? d->course_mean.cgy : NAN, false);
        csv_num(fp, est ? d->course_mean.upper_cgy : NAN, false);
        csv_num(fp, est ? d->course_nearmax.cgy : NAN, false);
        csv_num(fp, est ? d->course_nearest.cgy : NAN, false);
        csv_num(fp, a->governing               ? 100 * a->governing->dose_gy
                    : a->unjudged_level_gy > 0 ? 100 * a->unjudged_level_gy
                                               : NAN,
                false);
        char lsrc[600] = "";
        if (a->governing)
            snprintf(lsrc, sizeof lsrc, "%s (%s)", a->governing->source, a->governing->mark);
        else if (a->unjudged_level_gy > 0)
            snprintf(lsrc, sizeof lsrc, "%s", est_unjudged_level_text);
        csv_field(fp, lsrc, false);
        csv_field(fp, flags, false);
        csv_tps(fp, e, d, &tt);
        csv_field(fp, est ? (a->not_assessed_why ? a->not_assessed_why : "")
                          : (d->excluded_why ? d->excluded_why : ""),
                  false);
        csv_field(fp, advice, false);
        csv_field(fp, cb.data, true);
    }
    free(ve);
    sl_buf_free(&cb);
    sl_buf_free(&tt);
    return ferror(fp) ? sl_error_set(err, SL_EIO, "cannot write the CSV output") : SL_OK;
}

void est_ssd_text(const sl_beam_dose *bd, char *buf, size_t size)
{
    if (isfinite(bd->ssd_used_cm) && bd->isf_ssd_cm != bd->ssd_used_cm)
        /* the two SSDs disagree: profiles at one, the inverse square at the
         * other (the body's when nearer, the plan's when the body is farther) */
        snprintf(buf, size, "SSD %.1f cm for the profiles (inverse square %.3f to the %s %.1f cm)",
                 bd->ssd_used_cm, bd->isf, bd->body_farther ? "plan's" : "body's",
                 bd->isf_ssd_cm);
    else if (isfinite(bd->ssd_used_cm))
        snprintf(buf, size, "SSD %.1f cm (inverse square %.3f)", bd->ssd_used_cm, bd->isf);
    else
        snprintf(buf, size, "SSD unknown (no inverse-square correction)");
}

void est_limits_text(const sl_beam_dose *bd, char *buf, size_t size)
{
    double lo, hi;
    sl_curves_range(bd->curves, &lo, &hi);
    const double *dv;
    size_t nd = sl_curves_depths(bd->curves, &dv);
    sl_buf b = {0};
    sl_buf_printf(&b, "model limits: %.1f to %.1f cm from the field edge, depths ", lo, hi);
    for (size_t k = 0; k < nd; k++)
        sl_buf_printf(&b, "%s%g", k ? ", " : "", dv[k]);
    sl_buf_printf(&b, " cm, tilts ");
    nd = sl_curves_tilts(bd->curves, &dv);
    for (size_t k = 0; k < nd; k++)
        sl_buf_printf(&b, "%s%+g", k ? ", " : "", dv[k]);
    sl_buf_printf(&b, " deg, SSDs ");
    nd = sl_curves_ssds(bd->curves, &dv);
    for (size_t k = 0; k < nd; k++)
        sl_buf_printf(&b, "%s%g", k ? ", " : "", dv[k]);
    sl_buf_printf(&b, " cm");
    int n = snprintf(buf, size, "%s",
                     b.failed || !b.data ? "model limits: not printed (out of memory)" : b.data);
    if (n < 0 || (size_t)n >= size)
        memcpy(buf + size - 4, "...", 4); /* callers' buffers are far longer than 4 */
    sl_buf_free(&b);
}

bool est_pacing_assumed(const sl_estimate_report *r)
{
    for (size_t i = 0; i < r->as->n; i++)
        if (r->as->items[i].pacing_assumed)
            return true;
    return false;
}

void est_pacing_text(const sl_estimate_report *r, const sl_assessment *a, char *buf, size_t size)
{
    snprintf(buf, size, "; judged by the table in %s%s%s", r->levels->source,
             a->pacing_assumed  ? "; raised for pacing dependence, not stated: assumed"
             : a->pacing_raised ? "; raised for pacing dependence"
                                : "",
             a->neutron_band ? "; raised for a treatment beam that may produce neutrons" : "");
}

void est_obliquity_text(const sl_beam_dose *bd, char *buf, size_t size)
{
    if (isfinite(bd->place->obliquity_deg))
        snprintf(buf, size, "%.1f deg", bd->place->obliquity_deg);
    else
        snprintf(buf, size, "unknown");
}

/* A non-finite number must never reach a report: check what the writers
 * are about to print and name the field otherwise. Values that may be
 * unknown (an SSD, an obliquity, a group's MU under --reference-dose) are
 * written as unknown by the writers themselves. */
sl_status est_check_finite(const sl_estimate_report *r, sl_error *err)
{
    const sl_estimate *e = r->est;
    for (size_t b = 0; b < e->nbeams; b++) {
        const sl_beam_dose *bd = &e->beams[b];
        const double v[] = {bd->dose_per_mu_cgy, bd->isf, bd->cutout_factor};
        const char *names[] = {"dose_per_mu_cgy", "inverse_square", "cutout_factor"};
        for (int k = 0; k < 3; k++)
            if (!isfinite(v[k]))
                return sl_error_set(err, SL_EINTERNAL,
                                    "report refused a non-finite value for %s of beam %d (a bug: "
                                    "please report it)",
                                    names[k], bd->place->beam->number);
    }
    for (size_t o = 0; o < e->norgans; o++) {
        const sl_organ_dose *d = &e->organs[o];
        if (!d->estimated)
            continue;
        const sl_dose_stat *s[] = {&d->course_max, &d->course_mean, &d->course_nearmax,
                                   &d->course_nearest};
        const char *names[] = {"course_max", "course_mean", "course_nearmax", "course_nearest"};
        for (int k = 0; k < 4; k++) {
            if (!isfinite(s[k]->cgy) || !isfinite(s[k]->u_cgy) || !isfinite(s[k]->upper_cgy))
                return sl_error_set(err, SL_EINTERNAL,
                                    "report refused a non-finite value for %s of ROI '%s' (a "
                                    "bug: please report it)",
                                    names[k], d->roi->name);
        }
        if (!isfinite(d->min_distance_cm) || !isfinite(d->min_depth_cm) ||
            !isfinite(d->max_depth_cm))
            return sl_error_set(err, SL_EINTERNAL,
                                "report refused a non-finite distance or depth for ROI '%s' (a "
                                "bug: please report it)",
                                d->roi->name);
    }
    return SL_OK;
}

sl_status sl_report_estimate(FILE *fp, sl_format fmt, const sl_estimate_report *r, sl_error *err)
{
    sl_status st = est_check_finite(r, err);
    if (st != SL_OK)
        return st;
    if (fmt == SL_FORMAT_CSV)
        return csv_report(fp, r, err);
    if (fmt == SL_FORMAT_TEXT) {
        text_report(fp, r);
        return ferror(fp) ? sl_error_set(err, SL_EIO, "cannot write the output") : SL_OK;
    }
    jw w = {err, SL_OK};
    return jw_write(&w, json_report(&w, r), fp);
}
