/*
 * The organ-dose stage (see include/strayline/dose.h for the arithmetic).
 *
 * Organs are independent, so they are computed in parallel; each organ owns
 * its arrays, and the beams' curve sets are read-only during the loop.
 */
#include "strayline/dose.h"
#include "strayline/parallel.h"
#include "strayline/util.h"

#include <math.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

void sl_estimate_default_options(sl_estimate_options *o)
{
    memset(o, 0, sizeof *o);
    o->mode = SL_EVAL_FIT;
    o->prescription_isodose = NAN;
    o->reference_dose_cgy = NAN;
    o->setup_shift_cm = 0.5;
    o->tps_zone_cm = SL_TPS_ZONE_CM;
}

bool sl_dose_type_target(const char *type)
{
    static const char *const targets[] = {"PTV", "CTV", "GTV", "TREATED_VOLUME", "IRRAD_VOLUME"};
    for (size_t i = 0; type && i < sizeof targets / sizeof *targets; i++)
        if (strcmp(type, targets[i]) == 0)
            return true;
    return false;
}

bool sl_dose_type_excluded(const char *type, bool include_targets, const char **why)
{
    static const char *const others[] = {"EXTERNAL", "BOLUS", "SUPPORT", "FIXATION", "ISOCENTER",
                                         "REGISTRATION", "CONTRAST_AGENT"};
    if (!type)
        return false;
    if (sl_dose_type_target(type)) {
        if (why)
            *why = "a target volume (give --include-targets to estimate it)";
        return !include_targets;
    }
    for (size_t i = 0; i < sizeof others / sizeof *others; i++) {
        if (strcmp(type, others[i]) == 0) {
            if (why)
                *why = "not an organ (body, bolus, support, fixation, marker of the setup)";
            return true;
        }
    }
    return false;
}

static void organ_free(sl_organ_dose *o)
{
    free(o->fx_max);
    free(o->fx_mean);
    free(o->fx_nearmax);
    free(o->fx_nearest);
    free(o->course_cgy);
    free(o->tps_acc);
}

void sl_estimate_free(sl_estimate *e)
{
    if (!e)
        return;
    for (size_t b = 0; b < e->nbeams; b++) {
        sl_beam_dose *bd = &e->beams[b];
        free(bd->insert);
        free(bd->mu);
        free(bd->ref_cgy);
        free(bd->plan_beam_dose_cgy);
        sl_curve_set_free(bd->curves);
    }
    free(e->beams);
    for (size_t i = 0; i < e->norgans; i++)
        organ_free(&e->organs[i]);
    free(e->organs);
    free(e->fractions);
    free(e->ratios);
    sl_notes_free(&e->notes);
    free(e);
}

/* The model insert for a beam: the option's, else a model insert whose id
 * is a cutout block's name or tray id, else a name that no model has, so
 * that the open profiles stand in (and say so). */
static const char *choose_insert(const sl_model *m, const sl_beam *b, const char *option)
{
    bool cutout = false;
    for (size_t i = 0; i < b->nblocks; i++)
        cutout |= b->blocks[i].type == SL_BLOCK_APERTURE;
    if (!cutout)
        return SL_INSERT_OPEN;
    if (option)
        return option;
    for (size_t i = 0; i < b->nblocks; i++) {
        const sl_block *k = &b->blocks[i];
        if (k->type != SL_BLOCK_APERTURE)
            continue;
        const char *names[2] = {k->name, k->tray_id};
        for (int j = 0; j < 2; j++) {
            for (size_t s = 0; names[j] && s < m->machine.ninserts; s++) {
                const sl_insert_spec *in = &m->machine.inserts[s];
                if (strcmp(in->applicator, b->applicator.id) == 0 &&
                    sl_strcasecmp(in->id, names[j]) == 0)
                    return in->id;
            }
        }
    }
    return "custom cutout";
}

/* The plan's cutout at the nominal SSD: area (cm2) and equivalent square
 * (4 area / perimeter, cm, the rule applied to the model's inserts in
 * machine.h, so that a cutout of exactly an insert's size matches it). The
 * outline is in the isocentric plane. */
static void cutout_size(const sl_field *f, double nominal_ssd_cm, double sad_cm, double *area,
                        double *eqsq)
{
    double k = nominal_ssd_cm / sad_cm, per = 0;
    for (size_t i = 0; i < sl_outline_loop_count(f->edge); i++) {
        size_t n;
        const sl_vec2 *p = sl_outline_loop_points(f->edge, i, &n);
        for (size_t j = 0; j < n; j++)
            per += hypot(p[(j + 1) % n].x - p[j].x, p[(j + 1) % n].y - p[j].y);
    }
    *area = f->area_cm2 * k * k;
    *eqsq = per > 0 ? 4 * f->area_cm2 / per * k : NAN;
}

/* Does the model insert chosen for a cutout fit it? An insert of another
 * applicator is an input error; a size mismatch is a warning, and the
 * caller then uses the stand-in. */
static sl_status check_insert(sl_estimate *e, const sl_beam *b, sl_beam_dose *bd,
                              const char **ins, sl_error *err)
{
    const sl_machine *mc = &e->model->machine;
    if (strcmp(*ins, SL_INSERT_OPEN) == 0 || !bd->cutout)
        return SL_OK;
    const sl_insert_spec *spec = sl_machine_insert(mc, bd->applicator, *ins);
    if (!spec) {
        const sl_insert_spec *other = sl_machine_insert(mc, NULL, *ins);
        if (other)
            return sl_error_set(err, SL_EINPUT,
                                "%s: beam %d: insert '%s' fits applicator '%s', not the beam's "
                                "applicator '%s'",
                                e->plan->source, b->number, *ins, other->applicator,
                                bd->applicator);
        return SL_OK; /* not a model insert: the stand-in follows */
    }
    double a = sl_insert_area_cm2(spec), q = sl_insert_equivalent_square_cm(spec);
    double da = fabs(bd->cutout_area_cm2 / a - 1), dq = fabs(bd->cutout_eqsq_cm / q - 1);
    if (da <= SL_INSERT_MATCH_TOLERANCE && dq <= SL_INSERT_MATCH_TOLERANCE)
        return SL_OK;
    if (!isfinite(bd->cutout_area_cm2)) {
        sl_notes_add(&e->notes,
                     "beam %d: the cutout's outline is not known, so its size cannot be compared "
                     "with model insert '%s': the conservative stand-in is used instead",
                     b->number, spec->id);
        *ins = "custom cutout";
        return SL_OK;
    }
    sl_notes_add(&e->notes,
                 "beam %d: the plan's cutout (%.1f cm2, equivalent square %.1f cm at the nominal "
                 "SSD) does not match model insert '%s' (%.1f cm2, %.1f cm; tolerance %.0f %%): "
                 "the conservative stand-in for an uncommissioned cutout is used instead",
                 b->number, bd->cutout_area_cm2, bd->cutout_eqsq_cm, spec->id, a, q,
                 100 * SL_INSERT_MATCH_TOLERANCE);
    *ins = "custom cutout";
    return SL_OK;
}


/* The body (with the beam's bolus) nearer the source than the plan's SSD
 * says, beyond the 1 cm that locate warns about: one of the two is wrong.
 * The shorter SSD gives the higher central-axis dose (the inverse square),
 * so the reference dose takes it; the profiles stay read at the plan's SSD,
 * where the out-of-field percent near the field is the higher (it rises
 * with SSD). A plan's 110 cm over a body at 105 cm read 10 % lower; found
 * by an independent review. */
static bool body_nearer(const sl_beam_place *bp)
{
    return isfinite(bp->ssd_plan_cm) && isfinite(bp->ssd_found_cm) &&
           bp->ssd_found_cm < bp->ssd_plan_cm - SL_SSD_WARN_CM;
}

static bool body_farther(const sl_beam_place *bp)
{
    return isfinite(bp->ssd_plan_cm) && isfinite(bp->ssd_found_cm) &&
           bp->ssd_found_cm > bp->ssd_plan_cm + SL_SSD_WARN_CM;
}
static sl_status setup_beam(sl_estimate *e, const sl_beam_place *bp, sl_beam_dose *bd,
                            sl_error *err)
{
    const sl_plan *plan = e->plan;
    const sl_model *m = e->model;
    const sl_beam *b = bp->beam;
    const char *f = plan->source;
    bd->place = bp;
    bd->reference_raised_by = 1.0;
    bd->energy_mev = b->energy_mev;
    if (!b->applicator.present || !b->applicator.id)
        return sl_error_set(err, SL_EINPUT,
                            "%s: beam %d: no ApplicatorSequence (300A,0107): the model to use "
                            "cannot be chosen",
                            f, b->number);
    bd->applicator = b->applicator.id;
    /* a model is valid only for the machine it was measured on: another
     * machine's beam is refused, not estimated with a mark (a batch with one
     * model over a clinic's plans meets this routinely) */
    if (b->machine && m->machine.name && sl_strcasecmp(b->machine, m->machine.name) != 0)
        return sl_error_set(err, SL_EINPUT,
                            "%s: beam %d: TreatmentMachineName (300A,00B2) is '%s', but the model "
                            "is of machine '%s': a model is valid only for the machine it was "
                            "measured on (use that machine's model; a model's machine name must "
                            "be the one the planning system gives the machine)",
                            f, b->number, b->machine, m->machine.name);
    /* one machine has one source-axis distance: a plan that states another
     * is of another machine or a wrong export, and the cutout and the
     * applicator's opening are scaled to its isocentric plane (found by an
     * independent review: 80 cm against the model's 100 cm passed without
     * a word); 0.5 cm allows for rounding (common practice) */
    if (!b->sad_defaulted && m->machine.sad_cm > 0 &&
        fabs(b->sad_mm / 10 - m->machine.sad_cm) > 0.5)
        return sl_error_set(err, SL_EINPUT,
                            "%s: beam %d: SourceAxisDistance (300A,00B4) is %.1f cm, but the "
                            "model's machine '%s' has %.1f cm: the plan is of another machine, "
                            "or its export is wrong",
                            f, b->number, b->sad_mm / 10,
                            m->machine.name ? m->machine.name : "-", m->machine.sad_cm);
    if (!b->machine && m->machine.name)
        sl_notes_add(&e->notes,
                     "beam %d names no treatment machine (300A,00B2): check that it is treated "
                     "on '%s', the machine of the model",
                     b->number, m->machine.name);
    const char *ins = choose_insert(m, b, e->opt.insert);
    bd->cutout = strcmp(ins, SL_INSERT_OPEN) != 0;
    if (!bd->cutout && bp->field.has_cutout)
        /* the open profiles from the cutout's edge would under-read: only
         * the stand-in (no --insert) or a matching insert may stand for it */
        return sl_error_set(err, SL_EUSAGE,
                            "--insert %s: beam %d has a cutout; name the model insert that fits "
                            "it, or leave --insert out (the conservative stand-in is then used)",
                            SL_INSERT_OPEN, b->number);
    bd->cutout_area_cm2 = bd->cutout_eqsq_cm = bd->cutout_inset_cm = NAN;
    if (bd->cutout && bp->field.has_cutout)
        cutout_size(&bp->field, m->machine.nominal_ssd_cm, m->machine.sad_cm,
                    &bd->cutout_area_cm2, &bd->cutout_eqsq_cm);
    if (bd->cutout && bp->field.has_cutout && bp->field.applicator) {
        /* how far the cutout's edge lies inside the applicator's: a point
         * known only by its distance from the cutout (a landmark) is at most
         * this much nearer the applicator's edge */
        bd->cutout_inset_cm = 0;
        for (size_t i = 0; i < sl_outline_loop_count(bp->field.edge); i++) {
            size_t n;
            const sl_vec2 *p = sl_outline_loop_points(bp->field.edge, i, &n);
            for (size_t j = 0; j < n; j++)
                bd->cutout_inset_cm =
                    fmax(bd->cutout_inset_cm, -sl_outline_distance(bp->field.applicator, p[j]));
        }
    }
    sl_status cst = check_insert(e, b, bd, &ins, err);
    if (cst != SL_OK)
        return cst;
    bool ok = true;
    bd->insert = sl_strdup(ins, &ok);
    if (!ok)
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    sl_status st = sl_model_select(m, b->energy_mev, bd->applicator, ins, &bd->curves,
                                   &bd->model_flags, err);
    if (st != SL_OK) {
        char where[300];
        snprintf(where, sizeof where, "%s: beam %d", f, b->number);
        sl_error_prefix(err, where);
        return st;
    }
    sl_curves_prepare_shift(bd->curves, e->opt.setup_shift_cm);
    bd->uses_direction = sl_curves_use_direction(bd->curves);
    const sl_output_spec *o = sl_machine_output(&m->machine, b->energy_mev, bd->applicator);
    const sl_output_spec *o_nominal = o;
    double ssd_beam = isfinite(bp->ssd_plan_cm) ? bp->ssd_plan_cm : bp->ssd_found_cm;
    if (o && isfinite(ssd_beam))
        /* an output measured at another SSD, nearer the beam's, replaces the
         * nominal one (the inverse square then runs from there) */
        o = sl_machine_output_at(&m->machine, b->energy_mev, bd->applicator, ssd_beam, INFINITY);
    if (!o)
        return sl_error_set(err, SL_EINPUT,
                            "%s: no output (dose per MU) for %g MeV, applicator '%s'",
                            m->source ? m->source : "model", b->energy_mev, bd->applicator);
    bd->dose_per_mu_cgy = o->dose_per_mu_cgy;
    bd->dmax_cm = o->dmax_cm;
    bd->effective_ssd_cm = o->effective_ssd_cm;
    bd->cutout_factor = 1.0;
    bd->cutout_factor_assumed = false;
    const sl_cutout_factor *cf = NULL;
    for (size_t k = 0; bd->cutout && k < o->nfactors; k++)
        if (strcmp(o->factors[k].insert, ins) == 0)
            cf = &o->factors[k];
    if (bd->model_flags & SL_MF_OPEN_FOR_CUTOUT) {
        /* The stand-in is on the open output: open profiles are percentages
         * of the open field's central-axis dose, and the commissioned
         * inserts in it are scaled there by their own factors (model.h). */
        sl_notes_add(&e->notes,
                     "beam %d: the cutout is not commissioned: the largest of the open "
                     "applicator's profiles from the cutout's edge, the same from the "
                     "applicator's edge%s and the applicator's commissioned inserts is used, on "
                     "the open output%s; measure the cutout's profiles to replace this stand-in",
                     b->number,
                     bp->field.applicator ? "" : " (not available: the applicator's opening is "
                                                 "unknown)",
                     cf ? " (its cutout factor is not applied)" : "");
    } else if (bd->cutout) {
        const sl_insert_spec *spec = sl_machine_insert(&m->machine, bd->applicator, ins);
        sl_relative_to rel = spec ? spec->relative_to : SL_REL_UNSTATED;
        if (rel == SL_REL_UNSTATED)
            sl_notes_add(&e->notes,
                         "beam %d: the model does not say what insert '%s''s profiles are "
                         "relative to (profiles_relative_to): taken as its own central-axis "
                         "maximum, so its cutout factor is applied",
                         b->number, ins);
        if (rel == SL_REL_OPEN_CAX) {
            /* the profiles carry the cutout's output already */
        } else if (cf) {
            bd->cutout_factor = cf->factor;
        } else {
            bd->cutout_factor_assumed = true;
            sl_notes_add(&e->notes,
                         "beam %d: no cutout output factor in the model for insert '%s': 1 used "
                         "(an overestimate when the cutout lowers the output)",
                         b->number, ins);
        }
    }
    /* Inverse square at an SSD other than the nominal one. An SSD short of
     * the nominal one by more than the applicator's usual stand-off would put
     * the skin inside the applicator, and one far beyond it is outside what
     * the square law and the out-of-field profiles cover: both are refused
     * (bounds are common practice, not a published limit). */
    bool ssd_from_plan = isfinite(bp->ssd_plan_cm);
    const char *why_no_ssd = e->loc->depth_from_body ? "the central axis misses the body contour"
                                                     : "the body contour is not used";
    double ssd_lo = m->machine.nominal_ssd_cm - SL_SSD_SHORT_MAX_CM;
    double ssd_hi = m->machine.nominal_ssd_cm + SL_SSD_LONG_MAX_CM;
    /* the plan's SSD and the body's, each checked where it is used */
    double ssd_check[2] = {ssd_from_plan ? bp->ssd_plan_cm : NAN, NAN};
    bd->ssd_used_cm = ssd_from_plan ? bp->ssd_plan_cm : bp->ssd_found_cm;
    bd->isf_ssd_cm = bd->ssd_used_cm;
    if (body_nearer(bp)) {
        bd->body_nearer = true;
        bd->isf_ssd_cm = ssd_check[1] = bp->ssd_found_cm;
        sl_notes_add(&e->notes,
                     "beam %d: the SSD found on the body contour%s (%.1f cm) is shorter than "
                     "the plan's (%.1f cm): the inverse-square correction takes the shorter, "
                     "which gives the higher dose, and the profiles stay read at the plan's SSD; "
                     "check the plan's SSD and the body contour",
                     b->number, bp->nparts > 1 ? " with its bolus" : "", bp->ssd_found_cm,
                     bp->ssd_plan_cm);
    } else if (body_farther(bp)) {
        /* the mirror case: the out-of-field percent rises with SSD, so the
         * profiles are read at the body's longer SSD, while the inverse
         * square stays at the plan's shorter one; each factor the higher
         * (found by an independent review: 8 % lower at 5 cm of air) */
        bd->body_farther = true;
        bd->ssd_used_cm = ssd_check[1] = bp->ssd_found_cm;
        sl_notes_add(&e->notes,
                     "beam %d: the SSD found on the body contour%s (%.1f cm) is longer than the "
                     "plan's (%.1f cm): the profiles are read at the longer, where the "
                     "out-of-field percent is the higher, and the inverse-square correction "
                     "stays at the plan's SSD, which gives the higher dose; check the plan's SSD "
                     "and the body contour",
                     b->number, bp->nparts > 1 ? " with its bolus" : "", bp->ssd_found_cm,
                     bp->ssd_plan_cm);
    } else if (!ssd_from_plan) {
        ssd_check[1] = bp->ssd_found_cm;
    }
    for (int k = 0; k < 2; k++) {
        if (isfinite(ssd_check[k]) && !(ssd_check[k] >= ssd_lo && ssd_check[k] <= ssd_hi))
            return sl_error_set(err, SL_EINPUT,
                                "%s: beam %d: SSD %.1f cm (%s) is outside %.0f-%.0f cm, the "
                                "plausible range for the model's nominal SSD of %.0f cm (the "
                                "out-of-field profiles were measured there)",
                                f, b->number, ssd_check[k],
                                k == 0 ? "SourceToSurfaceDistance (300A,0130)"
                                       : "found on the body contour",
                                ssd_lo, ssd_hi, m->machine.nominal_ssd_cm);
    }
    if (isfinite(bd->ssd_used_cm)) {
        bd->gap_cm = bd->ssd_used_cm - m->machine.nominal_ssd_cm;
        double g = bd->isf_ssd_cm - o->ssd_cm;
        double r = (bd->effective_ssd_cm + bd->dmax_cm) / (bd->effective_ssd_cm + g + bd->dmax_cm);
        bd->isf = r * r;
        bd->output_ssd_cm = o->ssd_cm;
        bd->nominal_ratio = o_nominal->dose_per_mu_cgy / (o->dose_per_mu_cgy * bd->isf);
        if (o != o_nominal)
            sl_notes_add(&e->notes,
                         "beam %d: the output measured at SSD %g cm (%.4g cGy/MU) is used, with "
                         "the inverse square from there to %.1f cm",
                         b->number, o->ssd_cm, o->dose_per_mu_cgy, bd->ssd_used_cm);
        if (!ssd_from_plan)
            sl_notes_add(&e->notes,
                         "beam %d: the plan gives no SSD: the SSD found on the body contour "
                         "(%.1f cm) is used for the inverse-square correction",
                         b->number, bd->ssd_used_cm);
    } else if (!isnan(e->opt.reference_dose_cgy)) {
        bd->gap_cm = NAN;
        bd->isf = 1.0;
        bd->output_ssd_cm = o->ssd_cm;
        bd->nominal_ratio = 1.0;
        sl_notes_add(&e->notes,
                     "beam %d: no SSD (none in the plan, %s): the reference dose given by option "
                     "is used as it stands",
                     b->number, why_no_ssd);
    } else {
        return sl_error_set(err, SL_EINPUT,
                            "%s: beam %d: no SSD (no SourceToSurfaceDistance (300A,0130) in the "
                            "plan, and %s): the inverse-square correction is unknown; give "
                            "--reference-dose",
                            f, b->number, why_no_ssd);
    }
    /* meterset of each fraction group */
    size_t ng = e->ngroups;
    bd->mu = malloc(ng * sizeof *bd->mu);
    bd->ref_cgy = malloc(ng * sizeof *bd->ref_cgy);
    bd->plan_beam_dose_cgy = malloc(ng * sizeof *bd->plan_beam_dose_cgy);
    if (!bd->mu || !bd->ref_cgy || !bd->plan_beam_dose_cgy)
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    bool in_any = false;
    double per_mu = bd->dose_per_mu_cgy * bd->isf * bd->cutout_factor;
    for (size_t g = 0; g < ng; g++) {
        const sl_fraction_group *fg = &plan->groups[g];
        bd->mu[g] = bd->ref_cgy[g] = bd->plan_beam_dose_cgy[g] = NAN;
        for (size_t r = 0; r < fg->nrefs; r++) {
            if (fg->refs[r].beam_number != b->number)
                continue;
            if (!isfinite(fg->refs[r].meterset_mu) && isnan(e->opt.reference_dose_cgy))
                return sl_error_set(err, SL_EINPUT,
                                    "%s: fraction group %d: beam %d has no BeamMeterset "
                                    "(300A,0086): its monitor units are unknown (or give "
                                    "--reference-dose)",
                                    f, fg->number, b->number);
            /* a treatment beam of no monitor units (or a placeholder's
             * fraction of one) would read next to nothing everywhere and
             * pass every organ: the meterset is not set yet */
            if (fg->refs[r].meterset_mu < SL_MIN_TREATMENT_MU &&
                isnan(e->opt.reference_dose_cgy))
                return sl_error_set(err, SL_EINPUT,
                                    "%s: fraction group %d: beam %d has BeamMeterset "
                                    "(300A,0086) %.4g MU for an electron treatment beam, below "
                                    "%g MU: its monitor units are not set yet (export the plan "
                                    "after its MU are set, or give --reference-dose)",
                                    f, fg->number, b->number, fg->refs[r].meterset_mu,
                                    SL_MIN_TREATMENT_MU);
            in_any = true;
            bd->mu[g] = fg->refs[r].meterset_mu;
            bd->plan_beam_dose_cgy[g] = fg->refs[r].beam_dose_gy * 100.0;
            if (!isnan(e->opt.reference_dose_cgy)) {
                bd->ref_cgy[g] = e->opt.reference_dose_cgy;
                bd->reference_overridden = true;
            } else {
                bd->ref_cgy[g] = bd->mu[g] * per_mu;
            }
        }
    }
    if (!in_any)
        return sl_error_set(err, SL_EINPUT,
                            "%s: beam %d is in no fraction group: its monitor units and "
                            "fractions are unknown",
                            f, b->number);
    /* the plan's own dose statements, after the prescription isodose */
    double iso = isnan(e->opt.prescription_isodose) ? 1.0 : e->opt.prescription_isodose;
    for (size_t g = 0; g < ng; g++) {
        if (!isfinite(bd->ref_cgy[g]) || !isfinite(bd->plan_beam_dose_cgy[g]) ||
            bd->plan_beam_dose_cgy[g] <= 0)
            continue;
        double expect = bd->ref_cgy[g] * iso;
        double ratio = bd->plan_beam_dose_cgy[g] / expect;
        if (ratio > 1 + SL_BEAM_DOSE_RAISE_ABOVE && !bd->reference_overridden) {
            /* the plan's own statement of its dose is the higher: taken, so
             * that MU that contradict it (a plan exported before its MU
             * were final) never lower an organ (found by an independent
             * review: 10 MU against a Beam Dose of 4 Gy passed at 9 cGy) */
            sl_notes_add(&e->notes,
                         "beam %d: the plan's Beam Dose is %.1f cGy a fraction, %.1f %% above "
                         "the model's reference dose %.1f cGy x prescription isodose %.0f %% "
                         "(%.1f cGy): the reference dose is raised to %.1f cGy, what the Beam "
                         "Dose implies (the higher); check the MU, the output or "
                         "--prescription-isodose",
                         b->number, bd->plan_beam_dose_cgy[g], 100 * (ratio - 1),
                         bd->ref_cgy[g], 100 * iso, expect, bd->ref_cgy[g] * ratio);
            bd->ref_cgy[g] *= ratio;
            bd->reference_raised_by = fmax(bd->reference_raised_by, ratio);
            bd->reference_raised_from = "Beam Dose";
        } else if (fabs(ratio - 1) > SL_BEAM_DOSE_TOLERANCE) {
            sl_notes_add(&e->notes,
                         "beam %d: the plan's Beam Dose is %.1f cGy a fraction; the model's "
                         "reference dose %.1f cGy x prescription isodose %.0f %% gives %.1f cGy "
                         "(%+.0f %%): check the MU, the output or --prescription-isodose",
                         b->number, bd->plan_beam_dose_cgy[g], bd->ref_cgy[g], 100 * iso, expect,
                         100 * (ratio - 1));
        }
    }
    return SL_OK;
}

/* ------------------------------------------------------------ organs -- */

typedef struct organ_job {
    sl_estimate *e;
    sl_status *status;
} organ_job;

/* One sample of one beam: where it is for the model (depth, distances,
 * direction in the beam's eye view). The direction only where the beam's
 * curves tell directions apart: its arc tangent was 1.4 % of a scan. */
static sl_eval_query sample_query(const sl_estimate *e, size_t b, size_t o, size_t i)
{
    const sl_beam_place *bp = &e->loc->beams[b];
    const sl_organ_place *p = &bp->organs[o];
    sl_vec3 q = sl_frame_to_bld(&bp->frame, e->loc->samples[o].points[i]);
    double ax = fabs(q.x), ay = fabs(q.y);
    sl_eval_query r = {p->depth_cm[i], p->distance_cm[i], p->app_distance_cm[i],
                       e->beams[b].uses_direction && ax + ay > 0 ? atan2(ay, ax) * 180 / M_PI
                                                                 : 0,
                       e->opt.mode, 1.0, sl_beam_tilt_toward(bp, q.x, q.y),
                       e->beams[b].ssd_used_cm};
    return r;
}

/* beyond the commissioned SSDs at an extended one: the inverse square
 * alone may under-read (the air gap widens the penumbra and spreads the
 * applicator's scatter), so the upper bound keeps at least the estimate at
 * the nominal SSD */
static void extended_ssd_bound(const sl_beam_dose *bd, const sl_eval_query *q,
                               sl_model_value *v)
{
    if (!(v->flags & SL_MF_SSD_OUTSIDE) || !(bd->gap_cm > 0) || !isfinite(v->percent))
        return;
    sl_eval_query qn = *q;
    qn.ssd_cm = NAN;
    double vn = sl_curves_eval_percent(bd->curves, &qn); /* its dose alone counts here */
    double need = 0.5 * (vn * bd->nominal_ratio - v->percent);
    if (need > v->u_uncommissioned) {
        double rest = v->u_percent * v->u_percent - v->u_uncommissioned * v->u_uncommissioned;
        v->u_uncommissioned = need;
        v->u_percent = sqrt(fmax(rest, 0) + need * need);
    }
}

void sl_beam_eval(const sl_beam_dose *bd, const sl_eval_query *q, sl_model_value *v)
{
    sl_curves_eval_query(bd->curves, q, v);
    extended_ssd_bound(bd, q, v);
}

/* The model's value at the query and at +/- the setup shift; *us receives
 * the shift's uncertainty, and the result is the combined standard
 * uncertainty with it (percent). Of the shifted places only the dose
 * counts: the extended-SSD bound changes uncertainties alone. */
static double eval_shifted(const sl_beam_dose *bd, sl_eval_query q, double shift, double t,
                           sl_model_value *v, double *us)
{
    q.electron_t = t;
    double p[2];
    sl_curves_eval_query_shift(bd->curves, &q, shift, v, p);
    extended_ssd_bound(bd, &q, v);
    *us = fmax(fabs(p[0] - v->percent), fabs(p[1] - v->percent));
    return sqrt(v->u_percent * v->u_percent + *us * *us);
}

/* Add one beam's components (percent) at a coefficient c (cGy per percent
 * over the course) to a budget. */
static void add_budget(sl_budget *bg, double c, const sl_model_value *v, double us, double u)
{
    bg->fit_cgy += c * v->u_fit;
    bg->measurement_cgy += c * v->u_meas;
    bg->interpolation_cgy += c * v->u_interp;
    bg->extrapolation_cgy += c * v->u_extrap;
    bg->standin_cgy += c * v->u_standin;
    bg->uncommissioned_cgy += c * v->u_uncommissioned;
    bg->transfer_cgy += c * v->u_transfer;
    bg->setup_cgy += c * us;
    bg->combined_cgy += c * u;
}

/* The budget of the course dose at one sample: each component summed over
 * beams and fraction groups like the uncertainty itself. */
static void sample_budget(const sl_estimate *e, size_t o, size_t i, double t, sl_budget *bg)
{
    memset(bg, 0, sizeof *bg);
    for (size_t b = 0; b < e->nbeams; b++) {
        const sl_beam_dose *bd = &e->beams[b];
        sl_model_value v;
        double us;
        double u = eval_shifted(bd, sample_query(e, b, o, i), e->opt.setup_shift_cm, t, &v, &us);
        for (size_t g = 0; g < e->ngroups; g++) {
            if (!isfinite(bd->ref_cgy[g]))
                continue;
            add_budget(bg, e->fractions[g] * bd->ref_cgy[g] / 100, &v, us, u);
        }
    }
}

/* samples sorted by dose, hottest first, for the near-maximum */
typedef struct iv {
    double v;
    size_t i;
} iv;

static int cmp_iv(const void *a, const void *b)
{
    double x = ((const iv *)a)->v, y = ((const iv *)b)->v;
    return x < y ? 1 : x > y ? -1 : 0;
}

/* Whether a comes before b: hotter first, then the earlier sample, which is
 * the order a stable sort by cmp_iv gives (glibc's qsort is a merge sort). */
static bool iv_before(iv a, iv b)
{
    return a.v > b.v || (a.v == b.v && a.i < b.i);
}

/* iv_before as a comparison, for qsort */
static int cmp_iv_order(const void *a, const void *b)
{
    iv x = *(const iv *)a, y = *(const iv *)b;
    return iv_before(x, y) ? -1 : iv_before(y, x) ? 1 : 0;
}

/* Bins of the doses' range for the near-maximum's first cut. */
#define NEARMAX_BINS 256

/* The sample at which the hottest samples first hold a volume (cc): the
 * near-maximum's sample. Only the hottest few are needed: the samples'
 * volumes are summed into bins of the doses' range, the hottest bins that
 * hold the volume with a margin for rounding are kept whole, and only
 * their samples are sorted and summed hottest first, the sum and its
 * rounding as a sort of every sample would give them (heaping and popping
 * every sample was 2 % of a scan). A bin's index never falls as the dose
 * rises, so every sample hotter than one kept is kept. A NaN has no place
 * in that order, and then the whole array is sorted as before; so is it
 * for a volume or a sample's volume that is not a number, or a volume
 * below 0 (found by an independent review: no bin was kept, and the first
 * of an empty selection was read). w is NULL for a point organ (no
 * volume). order is scratch of n. */
static size_t nearmax_sample(const double *dv, const double *w, size_t n, double volume,
                             iv *order)
{
    if (n == 0)
        return 0;
    bool nan = false, odd = !(volume >= 0); /* odd: sort every sample */
    double lo = INFINITY, hi = -INFINITY;
    for (size_t i = 0; i < n; i++) {
        nan = nan || isnan(dv[i]);
        odd = odd || (w && isnan(w[i]));
        lo = dv[i] < lo ? dv[i] : lo;
        hi = dv[i] > hi ? dv[i] : hi;
    }
    double scale = (NEARMAX_BINS - 1) / (hi - lo);
    size_t m = 0;
    if (nan || odd || !w || !(hi > lo) || !isfinite(scale) || !(scale > 0)) {
        for (size_t i = 0; i < n; i++)
            order[i] = (iv){dv[i], i};
        m = n;
    } else {
        double held[NEARMAX_BINS] = {0};
        for (size_t i = 0; i < n; i++)
            held[(size_t)((dv[i] - lo) * scale)] += w[i];
        /* the hottest bins holding the volume, with a margin far above the
         * sums' rounding */
        double margin = 1e-9 * volume + 1e-300, acc = 0;
        size_t first = NEARMAX_BINS;
        while (first > 0 && acc < volume + margin)
            acc += held[--first];
        for (size_t i = 0; i < n; i++)
            if ((size_t)((dv[i] - lo) * scale) >= first)
                order[m++] = (iv){dv[i], i};
    }
    qsort(order, m, sizeof *order, nan ? cmp_iv : cmp_iv_order);
    double acc = 0;
    size_t inm = order[0].i;
    for (size_t k = 0; k < m; k++) {
        acc += w ? w[order[k].i] : 0;
        inm = order[k].i;
        if (acc >= volume)
            break;
    }
    return inm;
}

size_t sl_dose_nearmax_sample(const double *dose, const double *volume_cc, size_t n,
                              double volume, double *scratch)
{
    _Static_assert(sizeof(iv) <= 2 * sizeof(double), "scratch of 2 n doubles holds n pairs");
    return nearmax_sample(dose, volume_cc, n, volume, (iv *)(void *)scratch);
}

static void set_stat(sl_dose_stat *s, double v, double u)
{
    s->cgy = v;
    s->u_cgy = u;
    s->upper_cgy = v + 2 * u;
}

/* Raise a statistic's upper bound to the highest of its samples' bounds:
 * the uncertainty grows with distance (the transfer component steps up at
 * its band edges, the extrapolation component grows beyond the measured
 * distances), so a sample a little less hot but farther out can carry a
 * higher bound than the hottest one, and a screening judges by the bound.
 * The uncertainty shown is the one that bound implies (k = 2). */
static void raise_bound(sl_dose_stat *s, double upper)
{
    if (upper > s->upper_cgy) {
        s->upper_cgy = upper;
        s->u_cgy = 0.5 * (upper - s->cgy);
    }
}

/* The reach given for a point organ (sl_point_reach), 0 for none. */
static double reach_of(const sl_estimate *e, const sl_organ_dose *od)
{
    for (size_t k = 0; od->is_point && k < e->opt.nreach; k++)
        if (strcmp(e->opt.reach[k].roi, od->roi->name) == 0)
            return e->opt.reach[k].cm;
    return 0;
}

/* A point that stands for an organ of some size: the model's value (with
 * its uncertainty, k = 2) that much nearer each field, beams added as for
 * a sample, raises the point's upper bounds (found by an independent
 * review: a pacemaker given by its centre, 4.5 cm from the edge, passed in
 * the low band at a fifth of the dose its contour gets). */
static sl_status reach_bound(sl_estimate *e, size_t o, sl_organ_dose *od, double reach, double t)
{
    /* each beam's percent and its uncertainty there, once for all groups */
    double *pc = malloc(2 * (e->nbeams ? e->nbeams : 1) * sizeof *pc), *pu = pc + e->nbeams;
    if (!pc)
        return SL_ENOMEM;
    for (size_t b = 0; b < e->nbeams; b++) {
        const sl_beam_dose *bd = &e->beams[b];
        bool in_a_group = false;
        for (size_t g = 0; g < e->ngroups; g++)
            in_a_group = in_a_group || isfinite(bd->ref_cgy[g]);
        if (!in_a_group)
            continue;
        sl_eval_query q = sample_query(e, b, o, 0);
        q.distance_cm -= reach;
        if (isfinite(q.app_distance_cm))
            q.app_distance_cm -= reach;
        sl_model_value v;
        double us;
        pu[b] = eval_shifted(bd, q, e->opt.setup_shift_cm, t, &v, &us);
        pc[b] = v.percent;
        od->flags |= v.flags | bd->model_flags;
    }
    double course = 0, u_course = 0;
    for (size_t g = 0; g < e->ngroups; g++) {
        double fx = 0, u_fx = 0;
        for (size_t b = 0; b < e->nbeams; b++) {
            const sl_beam_dose *bd = &e->beams[b];
            if (!isfinite(bd->ref_cgy[g]))
                continue;
            fx += bd->ref_cgy[g] * pc[b] / 100;
            u_fx += bd->ref_cgy[g] * pu[b] / 100;
        }
        raise_bound(&od->fx_max[g], fx + 2 * u_fx);
        raise_bound(&od->fx_nearmax[g], fx + 2 * u_fx);
        course += e->fractions[g] * fx;
        u_course += e->fractions[g] * u_fx;
    }
    double up = course + 2 * u_course;
    if (up > od->course_max.upper_cgy)
        od->upper_elsewhere = true;
    raise_bound(&od->course_max, up);
    raise_bound(&od->course_nearmax, up);
    od->flags |= SL_MF_POINT_REACH;
    free(pc);
    return SL_OK;
}

static sl_status organ_task_run(sl_estimate *e, size_t o)
{
    sl_organ_dose *od = &e->organs[o];
    const sl_location *loc = e->loc;
    const sl_organ_samples *s = &loc->samples[o];
    od->organ = o;
    od->roi = loc->rois[o];
    od->volume_cc = s->volume_cc_total;
    od->is_point = s->is_point;
    od->ngroups = e->ngroups;
    od->shield_transmission = 1.0;
    for (size_t k = 0; k < e->opt.nshields; k++) {
        if (strcmp(e->opt.shields[k].roi, od->roi->name) == 0)
            od->shield_transmission = e->opt.shields[k].transmission;
    }
    od->min_distance_cm = od->min_depth_cm = INFINITY;
    od->max_depth_cm = -INFINITY;
    od->placed = s->n > 0;
    for (size_t b = 0; b < e->nbeams; b++) {
        const sl_organ_place *p = &loc->beams[b].organs[o];
        if (p->placed != s->n)
            od->placed = false;
        if (p->placed && !(p->max_distance_cm <= SL_MAX_DISTANCE_CM &&
                           p->max_depth_cm <= SL_MAX_DEPTH_CM) &&
            !sl_dose_type_excluded(od->roi->type, true, NULL))
            return SL_EINPUT; /* reported by the caller, which names the ROI */
        if (p->placed) {
            od->min_distance_cm = fmin(od->min_distance_cm, p->min_distance_cm);
            od->min_depth_cm = fmin(od->min_depth_cm, p->min_depth_cm);
            od->max_depth_cm = fmax(od->max_depth_cm, p->max_depth_cm);
        }
        if (sl_organ_in_field(p))
            od->in_field = true;
    }
    const char *why = NULL;
    if (sl_dose_type_excluded(od->roi->type, e->opt.include_targets, &why)) {
        od->excluded_why = why;
        return SL_OK;
    }
    if (od->in_field && !e->tps_used) {
        od->excluded_why = "in or touching the field: use the planning system's dose";
        return SL_OK;
    }
    if (!od->placed) {
        od->excluded_why = s->n ? "not placed: part of it lies at or behind a source plane"
                                : "no samples (no closed contour and no point)";
        return SL_OK;
    }
    /* a point that stands for an organ reaching into a field */
    double reach = reach_of(e, od), reach_dmin = INFINITY;
    od->point_reach_cm = reach;
    for (size_t b = 0; reach > 0 && b < e->nbeams; b++)
        reach_dmin = fmin(reach_dmin, loc->beams[b].organs[o].distance_cm[0] - reach);
    if (reach_dmin < SL_IN_FIELD_MARGIN_CM) {
        od->excluded_why = "given as a point, and an organ of its kind around it may reach into "
                           "the field (point reach): its dose is the planning system's or a "
                           "measurement's";
        return SL_OK;
    }
    size_t n = s->n, ng = e->ngroups;
    od->fx_max = calloc(ng, sizeof *od->fx_max);
    od->fx_mean = calloc(ng, sizeof *od->fx_mean);
    od->fx_nearmax = calloc(ng, sizeof *od->fx_nearmax);
    od->fx_nearest = calloc(ng, sizeof *od->fx_nearest);
    od->course_cgy = calloc(n, sizeof *od->course_cgy);
    double *dg = calloc(n * ng, sizeof *dg), *ug = calloc(n * ng, sizeof *ug);
    double *uc = calloc(n, sizeof *uc), *ec = calloc(n, sizeof *ec);
    double *dmin = malloc(n * sizeof *dmin);
    double *up = malloc(n * sizeof *up); /* each sample's upper bound (k = 2) */
    iv *order = malloc(n * sizeof *order);
    /* the planning system's course dose (cGy) at each sample, and whether
     * the sample takes it; the ratio accumulators: row 0 every beam, row
     * 1 + b beam b, SL_TPS_BINS bins of (n, sum, min, max) */
    const size_t nrow = 1 + e->nbeams;
    sl_status st = SL_OK;
    double *tv = e->tps_used ? malloc(n * sizeof *tv) : NULL;
    unsigned *mf = e->tps_used ? calloc(n, sizeof *mf) : NULL; /* model marks where TPS */
    unsigned char *use = calloc(n, 1);
    /* a sample that takes the planning system's dose near one field gets
     * the model's dose of each field whose edge lies beyond the zone added
     * to it: far from a field the planning system underestimates, and a
     * PLAN dose cannot be split by beam (its own share of those fields is
     * then counted twice, which errs high; found by an independent review).
     * Course, its u, the electron part, then per group dose and u; and the
     * model's marks of those fields */
    double *far = e->tps_used ? calloc(n * (3 + 2 * ng), sizeof *far) : NULL;
    unsigned *ff = e->tps_used ? calloc(n, sizeof *ff) : NULL;
    if (e->tps_used)
        od->tps_acc = calloc(nrow * SL_TPS_BINS * 4, sizeof *od->tps_acc);
    if (!od->fx_max || !od->fx_mean || !od->fx_nearmax || !od->fx_nearest || !od->course_cgy ||
        !dg || !ug || !uc || !ec || !dmin || !up || !order || !use ||
        (e->tps_used && (!tv || !mf || !od->tps_acc || !far || !ff))) {
        st = SL_ENOMEM;
        goto done;
    }
    for (size_t i = 0; i < n; i++)
        dmin[i] = INFINITY;
    for (size_t b = 0; b < e->nbeams; b++)
        for (size_t i = 0; i < n; i++)
            dmin[i] = fmin(dmin[i], loc->beams[b].organs[o].distance_cm[i]);
    bool near_by_model = false;
    for (size_t i = 0; i < n; i++) {
        if (e->tps_used) {
            const sl_vec3 q = s->points[i];
            double sum = 0;
            for (size_t f = 0; f < e->opt.ntps && !isnan(sum); f++)
                sum += sl_rtdose_at(e->opt.tps[f], q.x * 10, q.y * 10, q.z * 10);
            tv[i] = sum * 100; /* Gy over the course to cGy */
            if (dmin[i] < 0 && e->tps_low) {
                od->excluded_why = "in the field, where the planning system's dose reads below "
                                   "the course dose the plan gives (see the warning): not judged";
                goto done;
            }
            if (dmin[i] < 0 && !(tv[i] > 0)) {
                /* in the field (under a shielding block too) a grid that
                 * reads 0 was cut at a threshold or cropped: not a dose
                 * (found by an independent review: a lens under a block
                 * passed at 0) */
                od->excluded_why = "in the field, where the planning system's dose grid reads 0 "
                                   "(a grid cut at a threshold or cropped): not judged";
                goto done;
            }
            if (dmin[i] < e->tps_zone_cm) {
                if (!isnan(tv[i])) {
                    use[i] = 1;
                } else {
                    od->tps_outside_grid++;
                    if (dmin[i] < SL_IN_FIELD_MARGIN_CM) {
                        od->excluded_why = "in or touching the field and partly outside the "
                                           "planning system's dose grid";
                        goto done;
                    }
                }
            }
        }
        if (dmin[i] < SL_NEAR_EDGE_CM && !use[i])
            near_by_model = true;
    }
    double shift = e->opt.setup_shift_cm;
    double t = od->shield_transmission;
    /* the sample nearest the field: its flags and depth are the point's in
     * an in-vivo comparison (src/invivo), not the organ's as a whole */
    size_t nearest = 0;
    for (size_t i = 1; i < n; i++) {
        if (dmin[i] < dmin[nearest])
            nearest = i;
    }
    od->nearest_flags =
        n > 0 && dmin[nearest] < SL_NEAR_EDGE_CM && !use[nearest] ? SL_MF_NEAR_EDGE : 0;
    od->nearest_depth_cm = NAN;
    if (near_by_model) {
        od->near_edge = true;
        od->flags |= SL_MF_NEAR_EDGE;
    }
    for (size_t b = 0; b < e->nbeams; b++) {
        const sl_beam_dose *bd = &e->beams[b];
        const sl_organ_place *p = &loc->beams[b].organs[o];
        od->max_energy_mev = fmax(od->max_energy_mev, bd->energy_mev);
        /* a BEAM dose of this beam alone, for its row of the comparison */
        const sl_rtdose *own = NULL;
        for (size_t f = 0; e->tps_used && f < e->opt.ntps; f++) {
            const sl_rtdose *d = e->opt.tps[f];
            if (d->summation == SL_RTDOSE_BEAM && d->nbeams == 1 &&
                d->beams[0] == bd->place->beam->number)
                own = d;
        }
        for (size_t i = 0; i < n; i++) {
            /* this field's edge beyond the zone of a sample that takes the
             * planning system's dose */
            bool far_b = use[i] && p->distance_cm[i] >= e->tps_zone_cm;
            /* inside a field only the planning system's dose exists (and
             * the model's of the fields far from it) */
            if (use[i] && dmin[i] < 0 && !far_b)
                continue;
            sl_model_value v;
            double us;
            double u = eval_shifted(bd, sample_query(e, b, o, i), shift, t, &v, &us);
            double pc = v.percent;
            if (!use[i])
                od->flags |= v.flags | bd->model_flags;
            else
                mf[i] |= v.flags | bd->model_flags;
            if (far_b) {
                ff[i] |= v.flags | bd->model_flags;
                for (size_t g = 0; g < ng; g++) {
                    if (!isfinite(bd->ref_cgy[g]))
                        continue;
                    double c = e->fractions[g] * bd->ref_cgy[g] / 100;
                    far[i] += c * pc;
                    far[n + i] += c * u;
                    far[2 * n + i] += c * pc * (pc > 0 ? v.electron_percent / pc : 0);
                    far[(3 + g) * n + i] += bd->ref_cgy[g] * pc / 100;
                    far[(3 + ng + g) * n + i] += bd->ref_cgy[g] * u / 100;
                }
            }
            if (i == nearest && !use[i]) {
                od->nearest_flags |= v.flags | bd->model_flags;
                if (p->distance_cm[i] == dmin[i])
                    od->nearest_depth_cm = p->depth_cm[i];
            }
            double course_b = 0;
            for (size_t g = 0; g < ng; g++) {
                if (!isfinite(bd->ref_cgy[g]))
                    continue;
                dg[g * n + i] += bd->ref_cgy[g] * pc / 100;
                ug[g * n + i] += bd->ref_cgy[g] * u / 100;
                double c = e->fractions[g] * bd->ref_cgy[g] / 100;
                od->course_cgy[i] += c * pc;
                course_b += c * pc;
                uc[i] += c * u;
                ec[i] += c * pc * (pc > 0 ? v.electron_percent / pc : 0);
            }
            double di = p->distance_cm[i];
            if (own && di >= 0 && di < SL_TPS_BAND_CM) {
                const sl_vec3 q = s->points[i];
                double tb = sl_rtdose_at(own, q.x * 10, q.y * 10, q.z * 10) * 100;
                if (tb > 0) {
                    double *a = od->tps_acc + ((1 + b) * SL_TPS_BINS + (size_t)di) * 4;
                    double r = course_b / tb;
                    a[1] += r;
                    a[2] = a[0] > 0 ? fmin(a[2], r) : r;
                    a[3] = a[0] > 0 ? fmax(a[3], r) : r;
                    a[0] += 1;
                }
            }
        }
    }
    /* the seam: the planning system's dose within the zone, after the
     * comparison of the two over the band */
    for (size_t i = 0; e->tps_used && i < n; i++) {
        if (dmin[i] >= 0 && dmin[i] < SL_TPS_BAND_CM && tv[i] > 0) {
            double *a = od->tps_acc + (size_t)dmin[i] * 4;
            double r = od->course_cgy[i] / tv[i];
            a[1] += r;
            a[2] = a[0] > 0 ? fmin(a[2], r) : r;
            a[3] = a[0] > 0 ? fmax(a[3], r) : r;
            a[0] += 1;
        }
        if (!use[i])
            continue;
        if (dmin[i] >= 0 && od->course_cgy[i] > tv[i] + far[i]) {
            /* outside the field the planning system's dose stands only
             * where it is at least the model's: a grid cropped or cut at a
             * threshold reads 0 there (found by an independent review: a
             * lens 2 cm from the edge passed on the grid's 0); the model's
             * value keeps its marks, near the edge too */
            use[i] = 0;
            od->tps_below_model++;
            od->flags |= mf[i];
            if (dmin[i] < SL_NEAR_EDGE_CM) {
                od->near_edge = true;
                od->flags |= SL_MF_NEAR_EDGE;
            }
            if (i == nearest) {
                od->nearest_flags |= mf[i] | (dmin[i] < SL_NEAR_EDGE_CM ? SL_MF_NEAR_EDGE : 0);
                for (size_t b = 0; b < e->nbeams; b++)
                    if (loc->beams[b].organs[o].distance_cm[i] == dmin[i])
                        od->nearest_depth_cm = loc->beams[b].organs[o].depth_cm[i];
            }
            continue;
        }
        /* outside the field its upper bound (k = 2) is never below the
         * model's there either: a value a little above the model's central
         * one would otherwise trade the model's wide bound for its own
         * 5 % and pass an organ the model flags (found by an independent
         * review) */
        double model_up = dmin[i] >= 0 ? od->course_cgy[i] + 2 * uc[i] : 0;
        double tot = tv[i] + far[i];
        od->tps_samples++;
        if (far[i] > 0) {
            od->tps_far_model++;
            od->flags |= ff[i];
        }
        od->course_cgy[i] = tot;
        /* beams add linearly: the planning system's stated share and the
         * far fields' own */
        uc[i] = fmax(SL_TPS_U_FRACTION * tv[i] + far[n + i], (model_up - tot) / 2);
        /* an electron field's own dose near its edge: all electrons */
        ec[i] = tv[i] + far[2 * n + i];
        for (size_t g = 0; g < ng; g++) {
            double mg = dmin[i] >= 0 ? dg[g * n + i] + 2 * ug[g * n + i] : 0;
            /* one fraction group (checked) */
            double tg = tv[i] / e->fractions[g];
            dg[g * n + i] = tg + far[(3 + g) * n + i];
            ug[g * n + i] = fmax(SL_TPS_U_FRACTION * tg + far[(3 + ng + g) * n + i],
                                 (mg - dg[g * n + i]) / 2);
        }
    }
    /* statistics of one dose array */
    double vtot = 0;
    for (size_t i = 0; i < n; i++)
        vtot += s->is_point ? 1.0 : s->volume_cc[i];
    od->nearmax_volume_cc = s->is_point ? 0 : fmin(SL_NEARMAX_CC, SL_NEARMAX_FRACTION * vtot);
    od->nearest_sample = nearest;
    for (int pass = -1; pass < (int)ng; pass++) {
        const double *dv = pass < 0 ? od->course_cgy : dg + (size_t)pass * n;
        const double *uv = pass < 0 ? uc : ug + (size_t)pass * n;
        size_t imax = 0, iup = 0;
        double sum = 0, usum = 0;
        for (size_t i = 0; i < n; i++) {
            double w = s->is_point ? 1.0 : s->volume_cc[i];
            if (dv[i] > dv[imax])
                imax = i;
            up[i] = dv[i] + 2 * uv[i];
            if (up[i] > up[iup])
                iup = i;
            sum += w * dv[i];
            usum += w * uv[i];
        }
        size_t inm = nearmax_sample(dv, s->is_point ? NULL : s->volume_cc, n,
                                    od->nearmax_volume_cc, order);
        size_t inmu = nearmax_sample(up, s->is_point ? NULL : s->volume_cc, n,
                                     od->nearmax_volume_cc, order);
        sl_dose_stat *mx = pass < 0 ? &od->course_max : &od->fx_max[pass];
        sl_dose_stat *mn = pass < 0 ? &od->course_mean : &od->fx_mean[pass];
        sl_dose_stat *nm = pass < 0 ? &od->course_nearmax : &od->fx_nearmax[pass];
        sl_dose_stat *ne = pass < 0 ? &od->course_nearest : &od->fx_nearest[pass];
        set_stat(mx, dv[imax], uv[imax]);
        raise_bound(mx, up[iup]);
        set_stat(mn, sum / vtot, usum / vtot);
        set_stat(nm, dv[inm], uv[inm]);
        raise_bound(nm, up[inmu]);
        if (pass < 0)
            od->upper_elsewhere = up[iup] > dv[imax] + 2 * uv[imax];
        set_stat(ne, dv[nearest], uv[nearest]);
        if (pass < 0 && use[imax]) {
            /* a planning-system dose carries its stated uncertainty only */
            od->max_sample = imax;
            memset(&od->course_max_budget, 0, sizeof od->course_max_budget);
            od->course_max_budget.combined_cgy = uc[imax];
            /* all electrons near a field's edge, but the far fields' share
             * added to it is their own (mostly photons) */
            od->electron_fraction = dv[imax] > 0 ? fmin(ec[imax] / dv[imax], 1) : 1;
            od->max_from_tps = true;
        } else if (pass < 0) {
            od->max_sample = imax;
            sample_budget(e, o, imax, t, &od->course_max_budget);
        }
        if (pass < 0 && use[nearest]) {
            memset(&od->course_nearest_budget, 0, sizeof od->course_nearest_budget);
            od->course_nearest_budget.combined_cgy = uc[nearest];
        } else if (pass < 0) {
            sample_budget(e, o, nearest, t, &od->course_nearest_budget);
        }
        if (pass < 0 && !use[imax])
            od->electron_fraction = dv[imax] > 0 ? ec[imax] / dv[imax] : 0;
    }
    if (reach > 0) {
        if ((st = reach_bound(e, o, od, reach, t)) != SL_OK)
            goto done;
        if (reach_dmin < SL_NEAR_EDGE_CM) {
            od->near_edge = true;
            od->flags |= SL_MF_NEAR_EDGE;
        }
    }
    if (e->tps_used) {
        double vt = 0;
        for (size_t i = 0; i < n; i++)
            vt += use[i] ? (s->is_point ? 1.0 : s->volume_cc[i]) : 0;
        od->tps_volume_fraction = vtot > 0 ? vt / vtot : 0;
        od->nearest_from_tps = use[nearest];
    }
    od->estimated = true;
done: /* the scratch arrays, on every path (an organ left out keeps excluded_why) */
    free(dg);
    free(ug);
    free(uc);
    free(ec);
    free(dmin);
    free(up);
    free(order);
    free(tv);
    free(mf);
    free(use);
    free(far);
    free(ff);
    return st;
}

static void organ_task(size_t o, void *ctx)
{
    organ_job *j = ctx;
    j->status[o] = organ_task_run(j->e, o);
}

/* Does a planning-system dose hold this beam (a PLAN dose holds all)? */
static bool tps_has_beam(const sl_rtdose *d, int number)
{
    if (d->summation == SL_RTDOSE_PLAN)
        return true;
    for (size_t k = 0; k < d->nbeams; k++)
        if (d->beams[k] == number)
            return true;
    return false;
}

/* The planning system's doses must belong to the plan and cover each
 * placed beam exactly once (one PLAN dose, or BEAM doses), and the plan
 * have one fraction group, so that its course dose divides into fractions. */
static sl_status check_tps(sl_estimate *e, const sl_plan *plan, const sl_location *loc,
                           sl_error *err)
{
    const sl_estimate_options *opt = &e->opt;
    if (!(opt->tps_zone_cm > 0 && opt->tps_zone_cm <= 10))
        return sl_error_set(err, SL_EUSAGE, "planning-system zone %g cm: expected 0 to 10 cm",
                            opt->tps_zone_cm);
    if (plan->ngroups != 1)
        return sl_error_set(err, SL_EUSAGE,
                            "%s: %zu fraction groups: the planning system's dose can be combined "
                            "with a plan of one fraction group only",
                            plan->source, plan->ngroups);
    for (size_t f = 0; f < opt->ntps; f++) {
        const sl_rtdose *d = opt->tps[f];
        sl_status st = sl_rtdose_check_plan(d, plan, err);
        if (st != SL_OK)
            return st;
        if (d->summation == SL_RTDOSE_PLAN && opt->ntps > 1)
            return sl_error_set(err, SL_EUSAGE,
                                "%s: a PLAN dose holds every beam: give it alone, not with "
                                "other doses",
                                d->source);
    }
    if (opt->tps[0]->summation == SL_RTDOSE_BEAM) {
        for (size_t b = 0; b < loc->nbeams; b++) {
            int num = loc->beams[b].beam->number, times = 0;
            for (size_t f = 0; f < opt->ntps; f++)
                for (size_t k = 0; k < opt->tps[f]->nbeams; k++)
                    times += opt->tps[f]->beams[k] == num;
            if (times != 1)
                return sl_error_set(err, SL_EUSAGE,
                                    "beam %d of %s is in %d of the BEAM doses given: each "
                                    "treatment beam must be in exactly one",
                                    num, plan->source, times);
        }
    }
    /* each dose at each of its beams' reference points (on the central
     * axis at the depth of maximum) against the course dose there of every
     * beam of that dose whose field holds the point: the grid is used as it
     * is in the fields, so a grid of one fraction (found by independent
     * reviews: a lens in the field passed at a fifth of its dose, and with
     * three beams over one field a per-fraction grid read as one beam's
     * course), of another plan version or scaled wrongly must not be judged
     * on there. The reference doses err high by design (a stand-in cutout
     * factor of 1, --reference-dose), so a grid reading low is not refused:
     * its in-field doses are not used, and the organs there are not judged.
     * Where a reference point lies off the grid, the grid's maximum against
     * the largest single beam's course dose. */
    for (size_t f = 0; f < opt->ntps; f++) {
        const sl_rtdose *d = opt->tps[f];
        for (size_t b = 0; b < e->nbeams; b++) {
            const sl_beam_dose *bd = &e->beams[b];
            const sl_beam_place *bp = bd->place;
            if (!tps_has_beam(d, bp->beam->number) || !bp->entry_found ||
                !isfinite(bd->dmax_cm))
                continue;
            sl_vec3 dir = sl_frame_direction(&bp->frame);
            sl_vec3 p = {bp->entry_cm.x + bd->dmax_cm * dir.x, bp->entry_cm.y + bd->dmax_cm * dir.y,
                         bp->entry_cm.z + bd->dmax_cm * dir.z};
            double want_gy = 0;
            for (size_t c = 0; c < e->nbeams; c++) {
                const sl_beam_dose *cd = &e->beams[c];
                const sl_beam_place *cp = cd->place;
                sl_vec2 uv;
                double scale;
                if (!tps_has_beam(d, cp->beam->number) || !isfinite(cd->ref_cgy[0]) ||
                    !sl_frame_project(&cp->frame, sl_frame_to_bld(&cp->frame, p), &uv, &scale) ||
                    !(scale * sl_field_distance(&cp->field, uv) < 0))
                    continue;
                want_gy += cd->ref_cgy[0] * e->fractions[0] / 100;
            }
            double got_gy = sl_rtdose_at(d, p.x * 10, p.y * 10, p.z * 10);
            const char *where = "at its reference point";
            if (isnan(got_gy)) {
                /* off the grid: its maximum against this beam alone */
                got_gy = d->max_gy;
                want_gy = isfinite(bd->ref_cgy[0]) ? bd->ref_cgy[0] * e->fractions[0] / 100 : 0;
                where = "at its maximum (the beam's reference point lies off the grid)";
            }
            if (!(want_gy > 0))
                continue;
            double ratio = got_gy / want_gy;
            if (!(ratio >= SL_TPS_MAX_BELOW) && !e->tps_low) {
                e->tps_low = true;
                sl_notes_add(&e->notes,
                             "%s: beam %d: the planning system's dose %s reads %.4g Gy, %.2f "
                             "times the course dose the plan's beams give there by this "
                             "estimate (%.4g Gy: reference doses x %d fractions): a dose of one "
                             "fraction, of another plan version or with a wrong Dose Grid "
                             "Scaling (3004,000E), or a reference dose here too high; its doses "
                             "in the fields are not used, and organs there are not judged: check "
                             "the RT Dose is the plan's whole course",
                             d->source, bp->beam->number, where, got_gy, ratio, want_gy,
                             e->fractions[0]);
            } else if (ratio > SL_TPS_MAX_ABOVE) {
                sl_notes_add(&e->notes,
                             "%s: beam %d: the planning system's dose %s reads %.4g Gy, %.2f "
                             "times the course dose the plan's beams give there by this "
                             "estimate (%.4g Gy): check its Dose Grid Scaling and that it is "
                             "this plan's (organs judged on it read high)",
                             d->source, bp->beam->number, where, got_gy, ratio, want_gy);
            }
        }
    }
    e->tps_used = true;
    e->tps_zone_cm = opt->tps_zone_cm;
    if (opt->tps[0]->summation == SL_RTDOSE_PLAN && plan->nbeams > loc->nbeams)
        sl_notes_add(&e->notes,
                     "the planning system's PLAN dose includes beams not estimated here; within "
                     "%.1f cm of an estimated field it is used as it is",
                     e->tps_zone_cm);
    sl_notes_add(&e->notes,
                 "the planning system's dose (%s%s) is used within %.1f cm of any field edge, "
                 "the model beyond: the seam",
                 opt->tps[0]->source, opt->ntps > 1 ? " and others" : "", e->tps_zone_cm);
    return SL_OK;
}

/* The organs' shares of the comparison, added up into the table. */
static sl_status gather_ratios(sl_estimate *e, sl_error *err)
{
    const size_t nrow = 1 + e->nbeams;
    e->ratios = calloc(nrow * SL_TPS_BINS, sizeof *e->ratios);
    if (!e->ratios)
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    for (size_t r = 0; r < nrow; r++) {
        for (size_t k = 0; k < SL_TPS_BINS; k++) {
            double n = 0, sum = 0, lo = INFINITY, hi = -INFINITY;
            for (size_t o = 0; o < e->norgans; o++) {
                const double *a = e->organs[o].tps_acc;
                if (!a || a[(r * SL_TPS_BINS + k) * 4] == 0)
                    continue;
                a += (r * SL_TPS_BINS + k) * 4;
                n += a[0];
                sum += a[1];
                lo = fmin(lo, a[2]);
                hi = fmax(hi, a[3]);
            }
            if (n == 0)
                continue;
            sl_tps_ratio *t = &e->ratios[e->nratios++];
            t->beam_number = r == 0 ? 0 : e->beams[r - 1].place->beam->number;
            t->lo_cm = (double)k * SL_TPS_BAND_CM / SL_TPS_BINS;
            t->hi_cm = (double)(k + 1) * SL_TPS_BAND_CM / SL_TPS_BINS;
            t->n = (size_t)n;
            t->mean = sum / n;
            t->min = lo;
            t->max = hi;
        }
    }
    for (size_t o = 0; o < e->norgans; o++) {
        free(e->organs[o].tps_acc);
        e->organs[o].tps_acc = NULL;
    }
    return SL_OK;
}

sl_status sl_estimate_doses(const sl_plan *plan, const sl_structure_set *ss,
                            const sl_location *loc, const sl_estimate_options *opt,
                            sl_estimate **out, sl_error *err)
{
    *out = NULL;
    if (!opt->model)
        return sl_error_set(err, SL_EUSAGE, "an estimate needs a model file");
    if (!(opt->setup_shift_cm >= 0 && opt->setup_shift_cm <= 5))
        return sl_error_set(err, SL_EUSAGE, "setup shift %g cm: expected 0 to 5 cm",
                            opt->setup_shift_cm);
    sl_estimate *e = calloc(1, sizeof *e);
    if (!e)
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    e->plan = plan;
    e->ss = ss;
    e->loc = loc;
    e->model = opt->model;
    e->opt = *opt;
    e->ngroups = plan->ngroups;
    e->fractions = calloc(plan->ngroups ? plan->ngroups : 1, sizeof *e->fractions);
    e->beams = calloc(loc->nbeams ? loc->nbeams : 1, sizeof *e->beams);
    e->organs = calloc(loc->norgans ? loc->norgans : 1, sizeof *e->organs);
    if (!e->fractions || !e->beams || !e->organs) {
        sl_estimate_free(e);
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    }
    sl_status st = SL_OK;
    for (size_t g = 0; g < plan->ngroups && st == SL_OK; g++) {
        e->fractions[g] = plan->groups[g].fractions;
        if (e->fractions[g] < 1)
            st = sl_error_set(err, SL_EINPUT,
                              "%s: fraction group %d: NumberOfFractionsPlanned (300A,0078) "
                              "missing: the course dose is unknown",
                              plan->source, plan->groups[g].number);
    }
    for (size_t b = 0; b < loc->nbeams && st == SL_OK; b++) {
        e->nbeams = b + 1;
        st = setup_beam(e, &loc->beams[b], &e->beams[b], err);
    }
    /* an electron beam left out is said in every report (other kinds are
     * listed as beams this tool does not estimate) */
    for (size_t k = 0; k < loc->nskipped && st == SL_OK; k++) {
        const sl_beam *sb = sl_plan_find_beam(plan, loc->skipped[k].number);
        if (sb && sb->radiation_type && strcmp(sb->radiation_type, "ELECTRON") == 0)
            sl_notes_add(&e->notes, "beam %d '%s' is not estimated: %s", sb->number,
                         sb->name ? sb->name : "-", loc->skipped[k].reason);
    }
    if (st == SL_OK && !isnan(opt->reference_dose_cgy))
        sl_notes_add(&e->notes,
                     "the reference dose is set by option to %.1f cGy a fraction for every beam: "
                     "MU, output and inverse square are not used",
                     opt->reference_dose_cgy);
    /* A plan's prescription against its beams: the reference doses x
     * isodose x fractions of all its beams add up to at least what any
     * target receives (where beams treat one target their doses add; where
     * each treats its own, each gives it all). A prescription above that
     * sum, in a plan of electron beams only, means MU that contradict the
     * plan: every beam is raised by the ratio, the least that meets it (the
     * higher; found by independent reviews: 10 MU against 10 Gy passed a
     * lens in a plan of two beams). */
    bool others = false;
    for (size_t i = 0; i < plan->nbeams; i++)
        others |= sl_beam_is_other_treatment(&plan->beams[i]);
    for (size_t d = 0; st == SL_OK && d < plan->ndose_refs && e->nbeams > 0; d++) {
        double rx = plan->dose_refs[d].target_prescription_gy * 100;
        double iso = isnan(opt->prescription_isodose) ? 1.0 : opt->prescription_isodose;
        double sum = 0;
        bool overridden = false;
        for (size_t b = 0; b < e->nbeams; b++) {
            overridden |= e->beams[b].reference_overridden;
            for (size_t g = 0; g < e->ngroups; g++)
                if (isfinite(e->beams[b].ref_cgy[g]))
                    sum += e->beams[b].ref_cgy[g] * iso * e->fractions[g];
        }
        if (!isfinite(rx) || rx <= 0 || !(sum > 0))
            continue;
        const char *what = e->nbeams == 1 && e->ngroups == 1
                               ? "the reference dose x isodose %.0f %% x fractions"
                               : "the beams' reference doses x isodose %.0f %% x fractions, "
                                 "added up,";
        char lead[200];
        snprintf(lead, sizeof lead, what, 100 * iso);
        if (rx / sum > 1 + SL_BEAM_DOSE_RAISE_ABOVE && !overridden && !others) {
            double ratio = rx / sum;
            sl_notes_add(&e->notes,
                         "the plan prescribes %.0f cGy; %s give %.0f cGy (%+.1f %%): every "
                         "beam's reference dose is raised by %.1f %%, the least that meets the "
                         "prescription (the higher); check the MU, the output or "
                         "--prescription-isodose",
                         rx, lead, sum, 100 * (sum / rx - 1), 100 * (ratio - 1));
            for (size_t b = 0; b < e->nbeams; b++) {
                sl_beam_dose *bd = &e->beams[b];
                for (size_t g = 0; g < e->ngroups; g++)
                    bd->ref_cgy[g] *= ratio;
                bd->reference_raised_by *= ratio;
                bd->reference_raised_from = "prescription";
            }
        } else if (e->nbeams == 1 && e->ngroups == 1 && fabs(sum / rx - 1) > SL_BEAM_DOSE_TOLERANCE) {
            sl_notes_add(&e->notes, "the plan prescribes %.0f cGy; %s give %.0f cGy (%+.0f %%)",
                         rx, lead, sum, 100 * (sum / rx - 1));
        }
    }
    if (st == SL_OK && opt->ntps > 0)
        st = check_tps(e, plan, loc, err);
    if (st == SL_OK) {
        e->norgans = loc->norgans;
        sl_status *ost = calloc(loc->norgans ? loc->norgans : 1, sizeof *ost);
        if (!ost) {
            st = sl_error_set(err, SL_ENOMEM, "out of memory");
        } else {
            organ_job j = {e, ost};
            sl_parallel_for(loc->norgans, sl_parallel_threads(opt->threads), organ_task, &j);
            for (size_t o = 0; o < loc->norgans && st == SL_OK; o++) {
                if (ost[o] == SL_EINPUT)
                    st = sl_error_set(err, SL_EINPUT,
                                      "%s: ROI '%s' lies more than %.0f cm from a field edge or "
                                      "%.0f cm deep: its coordinates cannot be right for a "
                                      "patient",
                                      ss->source, loc->rois[o]->name, SL_MAX_DISTANCE_CM,
                                      SL_MAX_DEPTH_CM);
                else if (ost[o] != SL_OK)
                    st = sl_error_set(err, ost[o], "out of memory estimating organ doses");
            }
            free(ost);
        }
    }
    if (st == SL_OK && e->tps_used) {
        st = gather_ratios(e, err);
        size_t below = 0, norg = 0, far = 0, nfar = 0;
        for (size_t o = 0; o < e->norgans; o++) {
            below += e->organs[o].tps_below_model;
            norg += e->organs[o].tps_below_model > 0;
            far += e->organs[o].tps_far_model;
            nfar += e->organs[o].tps_far_model > 0;
        }
        if (far)
            sl_notes_add(&e->notes,
                         "planning system's dose: at %zu sample%s of %zu organ%s near one field "
                         "it is taken with the model's dose added for the fields whose edges "
                         "lie beyond the %.1f cm zone (far from a field the planning system "
                         "underestimates; its own share of those fields is counted twice, "
                         "which errs high)",
                         far, far == 1 ? "" : "s", nfar, nfar == 1 ? "" : "s", e->tps_zone_cm);
        if (below)
            sl_notes_add(&e->notes,
                         "planning system's dose: at %zu sample%s of %zu organ%s outside the "
                         "field within the %.1f cm zone it is below the model's, and the "
                         "model's value stands there with its marks (the higher of the two; a "
                         "grid cropped or cut at a threshold reads 0): check the RT Dose's "
                         "grid",
                         below, below == 1 ? "" : "s", norg, norg == 1 ? "" : "s",
                         e->tps_zone_cm);
    }
    if (st != SL_OK) {
        sl_estimate_free(e);
        return st;
    }
    *out = e;
    return SL_OK;
}

/* A landmark is one sample at a measured distance and depth for every
 * beam: the same arithmetic as a sample of organ_task_run. */
sl_status sl_estimate_add_landmark(sl_estimate *e, const sl_roi *roi, double distance_cm,
                                   double depth_cm, sl_error *err)
{
    if (!(distance_cm >= 0 && distance_cm <= SL_MAX_DISTANCE_CM) ||
        !(depth_cm >= 0 && depth_cm <= SL_MAX_DEPTH_CM))
        return sl_error_set(err, SL_EUSAGE,
                            "--landmark '%s': distance must be 0 to %.0f cm and depth 0 to %.0f "
                            "cm",
                            roi->name, SL_MAX_DISTANCE_CM, SL_MAX_DEPTH_CM);
    sl_organ_dose *no = realloc(e->organs, (e->norgans + 1) * sizeof *no);
    if (!no)
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    e->organs = no;
    sl_organ_dose *od = &e->organs[e->norgans];
    memset(od, 0, sizeof *od);
    od->organ = SIZE_MAX;
    od->roi = roi;
    od->landmark = true;
    od->is_point = true;
    od->placed = true;
    od->ngroups = e->ngroups;
    od->shield_transmission = 1.0;
    od->min_distance_cm = distance_cm;
    od->min_depth_cm = od->max_depth_cm = od->nearest_depth_cm = depth_cm;
    size_t ng = e->ngroups;
    od->fx_max = calloc(ng ? ng : 1, sizeof *od->fx_max);
    od->fx_mean = calloc(ng ? ng : 1, sizeof *od->fx_mean);
    od->fx_nearmax = calloc(ng ? ng : 1, sizeof *od->fx_nearmax);
    od->fx_nearest = calloc(ng ? ng : 1, sizeof *od->fx_nearest);
    od->course_cgy = calloc(1, sizeof *od->course_cgy);
    double *ug = calloc(ng ? ng : 1, sizeof *ug);
    if (!od->fx_max || !od->fx_mean || !od->fx_nearmax || !od->fx_nearest || !od->course_cgy ||
        !ug) {
        organ_free(od);
        free(ug);
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    }
    e->norgans++;
    double shift = e->opt.setup_shift_cm, uc = 0, ec = 0;
    if (distance_cm < SL_NEAR_EDGE_CM) {
        od->near_edge = true;
        od->flags |= SL_MF_NEAR_EDGE;
    }
    sl_budget *bg = &od->course_max_budget;
    for (size_t b = 0; b < e->nbeams; b++) {
        const sl_beam_dose *bd = &e->beams[b];
        od->max_energy_mev = fmax(od->max_energy_mev, bd->energy_mev);
        /* measured on the patient: the direction is unknown (the highest is
         * taken), and the applicator's edge is taken as near as the cutout
         * allows (its deepest inset), the cautious reading */
        double app = isfinite(bd->cutout_inset_cm) ? fmax(0, distance_cm - bd->cutout_inset_cm)
                                                   : NAN;
        /* the tilt toward it is unknown too: the highest commissioned */
        sl_eval_query q = {depth_cm, distance_cm, app, NAN, e->opt.mode, 1.0, NAN,
                           bd->ssd_used_cm};
        sl_model_value v;
        double us;
        double u = eval_shifted(bd, q, shift, 1.0, &v, &us);
        double pc = v.percent;
        od->flags |= v.flags | bd->model_flags;
        od->nearest_flags = od->flags; /* one point: the organ's own */
        for (size_t g = 0; g < ng; g++) {
            if (!isfinite(bd->ref_cgy[g]))
                continue;
            od->fx_max[g].cgy += bd->ref_cgy[g] * pc / 100;
            ug[g] += bd->ref_cgy[g] * u / 100;
            double c = e->fractions[g] * bd->ref_cgy[g] / 100;
            od->course_cgy[0] += c * pc;
            uc += c * u;
            ec += c * pc * (pc > 0 ? v.electron_percent / pc : 0);
            add_budget(bg, c, &v, us, u);
        }
    }
    for (size_t g = 0; g < ng; g++) {
        set_stat(&od->fx_max[g], od->fx_max[g].cgy, ug[g]);
        od->fx_mean[g] = od->fx_nearmax[g] = od->fx_nearest[g] = od->fx_max[g];
    }
    free(ug);
    set_stat(&od->course_max, od->course_cgy[0], uc);
    od->course_mean = od->course_nearmax = od->course_nearest = od->course_max;
    od->course_nearest_budget = od->course_max_budget;
    od->electron_fraction = od->course_cgy[0] > 0 ? ec / od->course_cgy[0] : 0;
    od->estimated = true;
    return SL_OK;
}
