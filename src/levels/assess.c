/*
 * The assessment stage: each estimated organ's kind, status against its
 * action levels or risk bands, and advice (shielding, measurement, risk
 * statements), every piece of advice carrying its source.
 *
 * Statuses use the course maximum (the hottest sample) and its upper bound
 * (k = 2): a deterministic effect follows the hottest part of a small organ,
 * and for a screening tool the hottest point is the cautious choice.
 * Lifetime cancer risks use the mean course dose, as risk models do.
 */
#include "strayline/levels.h"

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <strings.h>

void sl_assessments_free(sl_assessments *a)
{
    if (!a)
        return;
    for (size_t i = 0; i < a->n; i++) {
        free(a->items[i].checks);
        sl_notes_free(&a->items[i].advice);
        sl_notes_free(&a->items[i].statements);
    }
    free(a->items);
    free(a->other);
    sl_notes_free(&a->missing);
    sl_notes_free(&a->notes);
    free(a);
}

static int band_of(const sl_kind *k, double gy)
{
    for (size_t i = 0; i < k->nbands; i++) {
        if (gy < k->bands[i].below_gy)
            return (int)i;
    }
    return (int)k->nbands - 1;
}

/* A name that begins with a target's type (PTV, CTV, GTV, ITV, any case,
 * any suffix: PTVp, CTV_60, ptv-boost), as AAPM Report 263 (TG-263) names
 * target volumes. */
static bool target_prefix(const char *name)
{
    static const char *const prefixes[] = {"PTV", "CTV", "GTV", "ITV"};
    for (size_t i = 0; name && i < sizeof prefixes / sizeof *prefixes; i++)
        if (strncasecmp(name, prefixes[i], 3) == 0)
            return true;
    return false;
}

/* An organ with action levels that this screening cannot judge (in the
 * field, beyond the model's range, not placed) is counted so that no
 * headline reads as all clear. A fetus or a cardiac device left unjudged
 * needs attention in itself (common practice: their doses are documented).
 * So does any organ with levels in or touching the field, which receives
 * part of the treatment dose, far above any level here, and one whose
 * place is unknown (no closed contour, or not placed), whose dose is
 * unknown: neither may leave the plan looking clear (found by an
 * independent review: a lens in the field exited 0, the same lens just
 * outside it 4). */
static void unjudged(sl_assessments *as, sl_assessment *a)
{
    if (!a->kind || (a->kind->nlevels == 0 && a->kind->nbands == 0))
        return;
    as->n_unjudged++;
    a->unjudged = true;
    bool critical = a->kind->nbands > 0 || strcmp(a->kind->kind, "fetus") == 0;
    if (critical) {
        a->flagged = true;
        a->measurement_advised = true;
    }
    a->unjudged_unknown =
        a->status == SL_ST_IN_FIELD || (a->dose && !a->dose->in_field && !a->dose->placed);
    a->flagged |= a->unjudged_unknown;
    sl_notes_add(&a->advice, "not judged by this screening (%s): %s",
                 a->status == SL_ST_IN_FIELD ? "in or touching the field"
                                             : (a->not_assessed_why ? a->not_assessed_why
                                                                    : "not assessed"),
                 a->status == SL_ST_IN_FIELD
                     ? (critical ? "take its dose from the planning system and document it"
                                 : "take its dose from the planning system")
                     : (critical ? "estimate its dose by measurement (in-vivo or in a phantom) "
                                   "and document it"
                                 : "measure it if its dose matters"));
}

/* An estimated organ whose name matches no kind of the table may be any
 * of them: a clinic's own spelling, or a language the patterns lack
 * ("Embrione" at 69 mGy passed with exit 0; found by an independent
 * review). Once its upper bound reaches the table's lowest level it is not
 * judged, and flagged, until its kind is given (other_organ for none). */
const char sl_kind_unknown_why[] = "no kind of the action-level table matches its name";

static void kind_unknown(sl_assessments *as, sl_assessment *a, double lowest_gy,
                         const char *unknown_why)
{
    as->n_unjudged++;
    a->unjudged = true;
    a->kind_unknown = true;
    a->flagged = true;
    /* its value reaches that level; or nobody knows its dose here (in a
     * field, not placed, or other beams of the plan not estimated) */
    if (unknown_why) {
        a->unjudged_unknown = true;
        a->not_assessed_why = unknown_why;
    } else {
        a->unjudged_level_gy = lowest_gy;
        if (!a->not_assessed_why)
            a->not_assessed_why = sl_kind_unknown_why;
    }
    /* its value is shown, not judged: no advice is drawn from it */
    if (a->status != SL_ST_IN_FIELD)
        a->status = SL_ST_NOT_ASSESSED;
    char why[512];
    if (unknown_why)
        snprintf(why, sizeof why, "its dose is not known here (%s)", unknown_why);
    else
        snprintf(why, sizeof why, "its upper bound reaches the table's lowest level (%.1f cGy)",
                 100 * lowest_gy);
    sl_notes_add(&a->advice,
                 "not judged by this screening: no kind of the action-level table matches its "
                 "name, and %s; if it is a lens, thyroid, breast, gonad, bone marrow, fetus or "
                 "cardiac device, say so with --organ ROI=KIND, and if none, with --organ "
                 "ROI=other_organ",
                 why);
}

/* The types an organ of any kind may carry: an ORGAN, an AVOIDANCE
 * structure, or no type at all. A CONTROL or DOSE_REGION structure, a
 * MARKER, a CAVITY or a target is a planning aid or the treated volume;
 * its name matching no kind says nothing about an organ (--organ still
 * gives any of them a kind). */
static bool kind_unknown_eligible(const char *type)
{
    return !type || !*type || strcmp(type, "ORGAN") == 0 || strcmp(type, "AVOIDANCE") == 0;
}

static void advise(sl_assessment *a, const sl_patient *pt, double level_gy)
{
    const sl_organ_dose *d = a->dose;
    double gy = (d->course_max.cgy + a->other_cgy) / 100,
           up = (d->course_max.upper_cgy + a->other_cgy) / 100;
    /* an unjudged organ is flagged for measurement, not for a shield */
    bool over = a->status == SL_ST_EXCEEDS || a->status == SL_ST_MAY_EXCEED ||
                (a->status == SL_ST_BAND && (a->band >= 1 || a->band_upper >= 1));
    if (over) {
        /* a point's electron share is its own: its bound comes from nearer
         * the field, where electrons weigh more, so a shield is not said to
         * remove little */
        bool reach = d->point_reach_cm > 0 && d->electron_fraction <= 0.5;
        if (d->electron_fraction > 0.5 || reach) {
            a->shield_advised = true;
            a->shield_energy_mev = d->max_energy_mev;
            a->lead_mm = sl_lead_mm(d->max_energy_mev);
            a->alloy_mm = sl_alloy_mm(d->max_energy_mev);
            char share[160];
            if (reach)
                snprintf(share, sizeof share,
                         "given as a point, and nearer the field, where its bound comes from, "
                         "electrons may dominate (%.0f %% at the point)",
                         100 * d->electron_fraction);
            else
                snprintf(share, sizeof share, "most of this dose (%.0f %%) is from electrons",
                         100 * d->electron_fraction);
            sl_notes_add(&a->advice,
                         "shield: %s: at least %.1f mm of lead over the organ for %g MeV (E/2 "
                         "mm, Radiother Oncol 80:391 (2006), plus a 1 mm margin, textbook "
                         "rule), or about %.1f mm of low-melting-point alloy (1.2 x lead, from "
                         "memory)",
                         share, a->lead_mm, d->max_energy_mev, a->alloy_mm);
            sl_notes_add(&a->advice,
                         "an internal shield needs a low-Z coating (a few mm of wax or acrylic): "
                         "electrons backscattered from lead raise the dose in front of it "
                         "(common practice)");
            if (d->max_energy_mev > 15)
                sl_notes_add(&a->advice,
                             "above about 15 MeV measured 95 %% attenuation thicknesses exceed "
                             "E/2 mm (Giarratano, Duerkes & Almond, Med Phys 2:336 (1975): 18 to "
                             "23 mm at 28 MeV): confirm the shield's transmission by measurement");
        } else {
            a->photon_dominated = true;
            sl_notes_add(&a->advice,
                         "most of this dose (%.0f %%) is the slow photon part (bremsstrahlung and "
                         "leakage): a thin lead shield on the skin removes little of it (common "
                         "practice); confirm by measurement",
                         100 * (1 - d->electron_fraction));
        }
    }
    const char *why = NULL;
    char buf[160];
    if (isfinite(level_gy) && up >= 0.5 * level_gy) {
        /* in the unit of the doses beside it: mGy for a fetus, else cGy */
        bool fetus = a->kind && strcmp(a->kind->kind, "fetus") == 0;
        double f = fetus ? 1000 : 100;
        snprintf(buf, sizeof buf, "the upper bound (%.1f %s) is at least half the level (%.1f %s)",
                 f * up, fetus ? "mGy" : "cGy", f * level_gy, fetus ? "mGy" : "cGy");
        why = buf;
    } else if (d->flags & SL_MF_EXTRAPOLATED) {
        why = "the value is extrapolated beyond the measured distances";
    } else if (d->flags & SL_MF_OPEN_FOR_CUTOUT &&
               (isfinite(level_gy) || (a->kind && a->kind->nbands))) {
        why = "the cutout is not commissioned (a conservative stand-in is used: measure the "
              "cutout's profiles)";
    } else if (d->flags & (SL_MF_TILT_OUTSIDE | SL_MF_SSD_OUTSIDE) &&
               (isfinite(level_gy) || (a->kind && a->kind->nbands))) {
        why = d->flags & SL_MF_TILT_OUTSIDE
                  ? "the beam's tilt is beyond the commissioned tilts (nearest used)"
                  : "the SSD is beyond the commissioned SSDs (nearest used)";
    }
    if (why) {
        a->measurement_advised = true;
        sl_notes_add(&a->advice,
                     "in-vivo measurement (TLD, OSL or diode) advised: %s. Out of field an OSL "
                     "reader needs its energy correction (0.69 to 0.95, Scarboro et al. 2012): "
                     "uncorrected readings can be 5 to 45 %% high",
                     why);
    }
    /* risk statements */
    const sl_kind *k = a->kind;
    for (size_t i = 0; k && i < k->nstatements; i++) {
        const sl_statement *s = &k->statements[i];
        if (!sl_level_applies(s->weeks_from, s->weeks_to, pt->conception_weeks))
            continue;
        /* an age-dependent statement needs the age (the report asks for it) */
        if (!isnan(s->ages_from) && !(pt->age_years >= s->ages_from && pt->age_years < s->ages_to))
            continue;
        if (isfinite(s->per_gy))
            sl_notes_add(&a->statements, "%s: for %.1f mGy, about %.3f %% (%s; %s)", s->text,
                         1000 * gy, 100 * s->per_gy * gy, s->source, s->mark);
        else
            sl_notes_add(&a->statements, "%s (%s; %s)", s->text, s->source, s->mark);
    }
}

/* Patient's Sex and the age at the plan date from the plan, when the options
 * do not give them; a disagreement keeps the option and warns. */
static sl_status patient_from_plan(sl_assessments *as, const sl_plan *plan)
{
    sl_patient *pt = &as->patient;
    sl_status st = SL_OK;
    if (!plan)
        return SL_OK;
    const char *sx = plan->patient_sex;
    char dsex = sx && (strcmp(sx, "M") == 0 || strcmp(sx, "F") == 0) ? sx[0] : 0;
    if (pt->sex && dsex && dsex != pt->sex)
        st = sl_notes_add(&as->notes,
                          "--sex %c disagrees with the plan's Patient's Sex (0010,0040) '%c': "
                          "the option is used",
                          pt->sex, dsex);
    else if (!pt->sex && dsex) {
        pt->sex = dsex;
        pt->sex_from = "DICOM Patient's Sex";
    }
    double age;
    if (st == SL_OK && sl_age_on(plan->patient_birth_date, plan->plan_date, &age)) {
        if (!isnan(pt->age_years) && fabs(pt->age_years - age) >= 1)
            st = sl_notes_add(&as->notes,
                              "--age %g disagrees with the age at the plan date from the plan's "
                              "Patient's Birth Date (0010,0030) and RT Plan Date (300A,0006), "
                              "%g years: the option is used",
                              pt->age_years, age);
        else if (isnan(pt->age_years)) {
            pt->age_years = age;
            pt->age_from = "DICOM Patient's Birth Date and RT Plan Date";
        }
    }
    return st;
}

/* The plan's treatment beams that this tool does not estimate, with their
 * meterset summed over the fraction groups that hold them. */
static sl_status other_beams(sl_assessments *as, const sl_plan *plan)
{
    if (!plan)
        return SL_OK;
    for (size_t b = 0; b < plan->nbeams; b++) {
        const sl_beam *be = &plan->beams[b];
        if (!sl_beam_is_other_treatment(be))
            continue;
        sl_other_beam *nb = realloc(as->other, (as->nother + 1) * sizeof *nb);
        if (!nb)
            return SL_ENOMEM;
        as->other = nb;
        sl_other_beam *x = &as->other[as->nother++];
        x->number = be->number;
        x->name = be->name;
        x->radiation_type = be->radiation_type ? be->radiation_type : "unknown";
        x->energy = be->energy_mev;
        x->mu = NAN;
        x->fractions = -1;
        for (size_t g = 0; g < plan->ngroups; g++) {
            const sl_fraction_group *fg = &plan->groups[g];
            for (size_t r = 0; r < fg->nrefs; r++) {
                if (fg->refs[r].beam_number != be->number)
                    continue;
                if (isfinite(fg->refs[r].meterset_mu))
                    x->mu = (isnan(x->mu) ? 0 : x->mu) + fg->refs[r].meterset_mu;
                if (fg->fractions >= 0)
                    x->fractions = (x->fractions < 0 ? 0 : x->fractions) + fg->fractions;
            }
        }
        /* photons of 10 MV or more (TG-203 speaks of beams above 10 MV: from
         * memory; 10 MV itself counts, the cautious side) or of unknown
         * energy; protons, neutrons, ions and unknown kinds always */
        bool photon = be->radiation_type && strcmp(be->radiation_type, "PHOTON") == 0;
        x->neutron_producing = photon ? !(be->energy_mev < 10) : true;
        as->neutrons |= x->neutron_producing;
    }
    return SL_OK;
}

/* Fetal doses in mGy, the unit of the pregnancy documents: the verdict on
 * the lowest level that applies at every age comes first. */
static void fetus_verdict(sl_assessment *a, double gy, double up)
{
    const sl_level *base = NULL;
    for (size_t i = 0; i < a->kind->nlevels; i++) {
        const sl_level *v = &a->kind->levels[i];
        if (isnan(v->weeks_from) && (!base || v->dose_gy < base->dose_gy))
            base = v;
    }
    if (!base)
        return;
    a->verdict = true;
    double lv = 1000 * base->dose_gy;
    /* a value below the level never printed as the level */
    int dg = sl_decimals_below(1000 * gy, lv, 1), du = sl_decimals_below(1000 * up, lv, 1);
    if (up < base->dose_gy)
        sl_notes_add(&a->statements,
                     "verdict: the fetal dose, %.*f mGy (upper bound %.*f mGy), is below %.1f "
                     "mGy: %s (%s; %s)",
                     dg, 1000 * gy, du, 1000 * up, lv, base->name, base->source, base->mark);
    else
        sl_notes_add(&a->statements,
                     "verdict: the fetal dose, %.*f mGy (upper bound %.*f mGy), %s %.1f mGy, the "
                     "level below which there is no significant increase in risk (%s; %s): see "
                     "the period's thresholds",
                     dg, 1000 * gy, du, 1000 * up,
                     gy >= base->dose_gy ? "reaches" : "may reach", lv,
                     base->source, base->mark);
}

static bool is_kind(const sl_kind *k, const char *name)
{
    return k && strcmp(k->kind, name) == 0;
}

sl_status sl_assess(const sl_levels *lv, const sl_estimate *e, const sl_patient *pt,
                    const sl_organ_map *map, size_t nmap, sl_assessments **out, sl_error *err)
{
    return sl_assess_with(lv, e, pt, map, nmap, NULL, 0, out, err);
}

/* A plan whose fields meet none of the structure set's target volumes may
 * have been paired with another patient's or another course's structure
 * set, or carry a wrong isocentre: every organ's distance from the field
 * would then be wrong, and the screening must not read as clear (found by
 * an independent review; it was a caution beside an exit code of 0). */
static void missed_targets(const sl_estimate *est, sl_assessments *as)
{
    if (est->nbeams == 0)
        return;
    sl_buf names = {0};
    size_t n = 0;
    for (size_t i = 0; i < as->n; i++) {
        /* typed a target, or named one type first as AAPM TG-263 names
         * targets (RT ROI Interpreted Type may be empty: found by an
         * independent review, an untyped PTV_sternum escaped this check),
         * unless --organ says what it is */
        const sl_assessment *a = &as->items[i];
        const sl_organ_dose *d = a->dose;
        if (!d || !d->roi ||
            !(sl_dose_type_target(d->roi->type) ||
              (target_prefix(d->roi->name) && !a->kind_by_option)))
            continue;
        if (d->in_field) {
            sl_buf_free(&names);
            return;
        }
        char nm[160];
        sl_buf_printf(&names, "%s%s", n++ ? ", " : "",
                      sl_text_escape(d->roi->name, nm, sizeof nm));
    }
    if (n)
        sl_notes_add(&as->missing,
                     "target in a field: no target volume lies in any field (%s): check that "
                     "the plan and the structure set belong together; every distance holds "
                     "only if they do",
                     names.data && !names.failed ? names.data : "");
    as->any_flagged |= n > 0;
    sl_buf_free(&names);
}

sl_status sl_assess_with(const sl_levels *lv, const sl_estimate *e, const sl_patient *pt_in,
                         const sl_organ_map *map, size_t nmap, const sl_other_dose *other,
                         size_t nother, sl_assessments **out, sl_error *err)
{
    *out = NULL;
    for (size_t m = 0; m < nother; m++) {
        bool found = false;
        for (size_t o = 0; o < e->norgans; o++)
            found |= strcmp(e->organs[o].roi->name, other[m].roi) == 0;
        if (!found)
            return sl_error_set(err, SL_EUSAGE, "--other-dose '%s=%g': no ROI is named '%s'",
                                other[m].roi, other[m].cgy, other[m].roi);
    }
    for (size_t m = 0; m < nmap; m++) {
        bool found = false;
        for (size_t o = 0; o < e->norgans; o++)
            found |= strcmp(e->organs[o].roi->name, map[m].roi) == 0;
        if (!found)
            return sl_error_set(err, SL_EUSAGE, "--organ '%s=%s': no ROI is named '%s'",
                                map[m].roi, map[m].kind, map[m].roi);
        if (!sl_levels_kind(lv, map[m].kind)) {
            char kinds[400] = "";
            for (size_t i = 0; i < lv->nkinds; i++) {
                strncat(kinds, i ? ", " : "", sizeof kinds - strlen(kinds) - 1);
                strncat(kinds, lv->kinds[i].kind, sizeof kinds - strlen(kinds) - 1);
            }
            return sl_error_set(err, SL_EUSAGE, "--organ '%s=%s': unknown kind (known: %s)",
                                map[m].roi, map[m].kind, kinds);
        }
    }
    sl_assessments *as = calloc(1, sizeof *as);
    if (!as)
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    as->levels = lv;
    as->patient = *pt_in;
    const sl_patient *pt = &as->patient;
    if (patient_from_plan(as, e->plan) != SL_OK || other_beams(as, e->plan) != SL_OK) {
        sl_assessments_free(as);
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    }
    as->n = e->norgans;
    as->items = calloc(e->norgans ? e->norgans : 1, sizeof *as->items);
    if (!as->items) {
        sl_assessments_free(as);
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    }
    bool lar_note = false, age_note = false, fetus_found = false, device_found = false;
    /* the lowest level of the table, for an organ of no kind */
    double table_lowest = INFINITY;
    for (size_t k = 0; k < lv->nkinds; k++) {
        /* a man's organ is no fetus (unless a gestational age says the
         * sex given is not the whole story) */
        if (pt->sex == 'M' && isnan(pt->conception_weeks) &&
            strcmp(lv->kinds[k].kind, "fetus") == 0)
            continue;
        for (size_t l = 0; l < lv->kinds[k].nlevels; l++)
            table_lowest = fmin(table_lowest, lv->kinds[k].levels[l].dose_gy);
        if (lv->kinds[k].nbands)
            table_lowest = fmin(table_lowest, lv->kinds[k].bands[0].below_gy);
    }
    for (size_t o = 0; o < e->norgans; o++) {
        sl_assessment *a = &as->items[o];
        const sl_organ_dose *d = &e->organs[o];
        a->dose = d;
        a->band = a->band_upper = -1;
        a->lar_cases = NAN;
        a->kind = sl_levels_match(lv, d->roi->name);
        for (size_t m = 0; m < nmap; m++) {
            if (strcmp(map[m].roi, d->roi->name) == 0) {
                a->kind = sl_levels_kind(lv, map[m].kind);
                a->kind_by_option = true;
            }
        }
        /* a ROI named for the gonads takes the patient's sex's levels */
        if (!a->kind_by_option && is_kind(a->kind, "gonads") && pt->sex) {
            const sl_kind *g = sl_levels_kind(lv, pt->sex == 'M' ? "testis" : "ovary");
            a->kind = g ? g : a->kind;
        }
        for (size_t m = 0; m < nother; m++) {
            if (strcmp(other[m].roi, d->roi->name) == 0)
                a->other_cgy += other[m].cgy;
        }
        const char *xwhy;
        bool excluded_type = sl_dose_type_excluded(d->roi->type, e->opt.include_targets, &xwhy);
        fetus_found |= is_kind(a->kind, "fetus") && !excluded_type;
        device_found |= a->kind && a->kind->nbands > 0 && !excluded_type;
        /* beams this tool does not estimate leave every organ with levels
         * incomplete, unless the user added their dose (--other-dose) */
        a->incomplete = as->nother > 0 && d->estimated && a->kind &&
                        (a->kind->nlevels || a->kind->nbands) && !excluded_type &&
                        a->other_cgy == 0;
        if (a->incomplete) {
            as->n_incomplete++;
            a->flagged = true;
            sl_notes_add(&a->advice,
                         "incomplete: other beams not included: the plan has %zu treatment "
                         "beam%s this tool does not estimate; take their dose to this organ from "
                         "the planning system or a measurement and add it with --other-dose "
                         "'%s=CGY' (other_dose in a facts file for scan and listen)",
                         as->nother, as->nother == 1 ? "" : "s", d->roi->name);
        }
        if (a->other_cgy > 0)
            sl_notes_add(&a->advice,
                         "includes %.1f cGy given by --other-dose (a dose from elsewhere: other "
                         "beams or an earlier course), added to the estimate and its upper bound",
                         a->other_cgy);
        for (size_t i = 0; a->kind && i < a->kind->nstatements; i++)
            age_note |= !isnan(a->kind->statements[i].ages_from) && isnan(pt->age_years);
        if (a->kind && strcmp(a->kind->kind, "fetus") == 0 && isnan(pt->conception_weeks) &&
            pt->age_unknown_unjudged) {
            /* a batch goes on: the levels depend on the weeks, so the fetus is
             * shown, not judged, and flagged (unjudged() flags a fetus) */
            a->status = SL_ST_NOT_ASSESSED;
            a->not_assessed_why = "no gestational age given: its levels depend on the weeks "
                                  "after conception; supply the gestational age to judge it";
            unjudged(as, a);
            as->any_flagged |= a->flagged;
            continue;
        }
        if (a->kind && strcmp(a->kind->kind, "fetus") == 0 && isnan(pt->conception_weeks)) {
            sl_status st = sl_error_set(err, SL_EUSAGE,
                                        "ROI '%s' is a fetus: give its gestational age with "
                                        "--gestational-age WEEKS (since the last menstrual "
                                        "period) or --weeks-after-conception WEEKS",
                                        d->roi->name);
            sl_assessments_free(as);
            return st;
        }
        if (!d->estimated) {
            a->status = d->in_field ? SL_ST_IN_FIELD : SL_ST_NOT_ASSESSED;
            a->not_assessed_why = d->excluded_why;
            /* any ROI whose name or --organ gives it action levels and that
             * is not estimated is not judged, whatever its type: a lens or
             * a pacemaker typed SUPPORT or PTV passed in silence before
             * (found by independent reviews); a target named as an organ
             * says why it was left out. But a target volume named as one
             * by its prefix (PTV_Thyroid_bed) is the target, not the organ
             * its name also holds: AAPM TG-263 names targets type first */
            bool named_target = sl_dose_type_target(d->roi->type) && !a->kind_by_option &&
                                target_prefix(d->roi->name);
            if (named_target)
                a->kind = NULL;
            else
                unjudged(as, a);
            /* a ROI of no kind in the field, or contoured but not placed
             * (open contours only, or behind a source plane), has a dose
             * nobody knows here: it may be any kind (one with no contour
             * at all is a name alone, and has no dose) */
            if (!a->kind && !named_target && kind_unknown_eligible(d->roi->type) &&
                (d->in_field || (!d->placed && d->roi->ncontours > 0)) &&
                isfinite(table_lowest))
                kind_unknown(as, a, table_lowest,
                             d->excluded_why ? d->excluded_why : "not estimated");
            if (a->unjudged && sl_dose_type_target(d->roi->type) && !e->opt.include_targets)
                sl_notes_add(&a->advice,
                             "typed %s, a target volume, yet named as a %s: not estimated; if "
                             "it is the organ, correct its RT ROI Interpreted Type (3006,00A4) "
                             "or give --include-targets",
                             d->roi->type, a->kind->description ? a->kind->description
                                                                : a->kind->kind);
            /* a name read as an organ on a ROI typed as a setup aid (a mask
             * or a board named "Device"): flagged all the same, since a
             * pacemaker typed SUPPORT passed once; the way out is said */
            else if (a->unjudged && !a->kind_by_option && a->kind && d->roi->type &&
                     !sl_dose_type_target(d->roi->type) &&
                     sl_dose_type_excluded(d->roi->type, false, NULL)) {
                a->type_not_organ = true;
                sl_notes_add(&a->advice,
                             "typed %s, not an organ, yet its name matches the kind %s: if "
                             "it is one, correct its RT ROI Interpreted Type (3006,00A4); if "
                             "it is not, say so with --organ \"%s=other_organ\"",
                             d->roi->type, a->kind->kind, d->roi->name);
            }
            as->any_flagged |= a->flagged;
            continue;
        }
        if (d->point_reach_cm > 0)
            sl_notes_add(&a->advice,
                         "given as a point: its upper bound covers the organ reaching %.1f cm "
                         "nearer the field from that point (point reach); give the organ's "
                         "point nearest the field, or contour it, to narrow it",
                         d->point_reach_cm);
        /* beyond the model's range, for the nearest beam */
        for (size_t b = 0; b < e->nbeams; b++) {
            /* a landmark is at its measured distance from every beam */
            double pd = d->landmark ? d->min_distance_cm
                                    : e->loc->beams[b].organs[o].min_distance_cm;
            double lo, hi;
            sl_curves_range(e->beams[b].curves, &lo, &hi);
            if (pd <= d->min_distance_cm + 1e-9 && pd > SL_BEYOND_RANGE_FACTOR * hi) {
                a->status = SL_ST_NOT_ASSESSED;
                a->not_assessed_why = "beyond the model's range (more than 1.5 times the "
                                      "farthest measured distance): the extrapolated value is "
                                      "shown, not judged";
            }
        }
        /* near the edge the planning system's dose is the better number */
        if (d->near_edge && a->status != SL_ST_NOT_ASSESSED && a->kind &&
            (a->kind->nlevels || a->kind->nbands)) {
            a->status = SL_ST_NOT_ASSESSED;
            a->not_assessed_why =
                d->point_reach_cm > 0 && d->min_distance_cm >= SL_NEAR_EDGE_CM
                    ? "given as a point, and an organ of its kind around it may reach within 1 "
                      "cm of the field edge (point reach): the planning system's dose is the "
                      "reference there; the model's value is shown, not judged"
                    : "near the field edge (closer than 1 cm): the planning system's dose is "
                      "the reference here; the model's value is shown, not judged";
        }
        /* a dose from elsewhere adds to the estimate and to its upper bound */
        double gy = (d->course_max.cgy + a->other_cgy) / 100,
               up = (d->course_max.upper_cgy + a->other_cgy) / 100;
        double level_gy = NAN;
        const sl_kind *k = a->kind;
        if (a->status == SL_ST_NOT_ASSESSED) {
            unjudged(as, a);
            /* not judged is not cleared: a value shown that reaches a level
             * needs attention even where the model is not the reference */
            double lowest = INFINITY;
            for (size_t i = 0; k && i < k->nlevels; i++) {
                /* the periods count weeks after conception; with no age
                 * given, every period's level could be the one */
                if (isnan(pt->conception_weeks) ||
                    sl_level_applies(k->levels[i].weeks_from, k->levels[i].weeks_to,
                                     pt->conception_weeks))
                    lowest = fmin(lowest, k->levels[i].dose_gy);
            }
            if (k && k->nbands)
                lowest = fmin(lowest, k->bands[0].below_gy);
            if (d->estimated && up >= lowest) {
                a->flagged = true;
                a->measurement_advised = true;
                a->unjudged_level_gy = lowest;
                sl_notes_add(&a->advice,
                             "the value shown (%.1f cGy, upper bound %.1f cGy) reaches the "
                             "level of %.1f cGy: though not judged here, check this organ's dose "
                             "(the planning system's, or a measurement)",
                             100 * gy, 100 * up, 100 * lowest);
            }
        } else if (k && k->nbands) {
            a->band = band_of(k, gy);
            a->band_upper = band_of(k, up);
            int top = (int)k->nbands - 1;
            /* pacing dependence not stated is taken as stated: the higher
             * band (found by an independent review: a pacing-dependent
             * patient's device passed at the lower band when nobody said) */
            if (pt->pacing_dependent || !pt->pacing_stated) {
                int b0 = a->band, b1 = a->band_upper;
                a->band = a->band + k->pacing_shift > top ? top : a->band + k->pacing_shift;
                a->band_upper = a->band_upper + k->pacing_shift > top
                                    ? top
                                    : a->band_upper + k->pacing_shift;
                /* a table's floor for pacing-dependent patients (Hurkmans et
                 * al. 2012, Table 2: below 2 Gy medium, not low) */
                if (k->pacing_min_band >= 0) {
                    a->band = a->band < k->pacing_min_band ? k->pacing_min_band : a->band;
                    a->band_upper = a->band_upper < k->pacing_min_band ? k->pacing_min_band
                                                                       : a->band_upper;
                }
                a->pacing_raised = a->band != b0 || a->band_upper != b1;
                a->pacing_assumed = a->pacing_raised && !pt->pacing_stated;
                if (a->pacing_assumed)
                    sl_notes_add(&a->advice,
                                 "pacing dependence not stated: judged as for a "
                                 "pacing-dependent patient (the higher band); if the patient "
                                 "is not pacing dependent, say so (--not-pacing-dependent, or "
                                 "pacing_dependent: false in a facts file)");
            }
            if (as->neutrons && k->neutron_band >= 0) {
                a->neutron_band = a->band < k->neutron_band;
                a->band = a->band < k->neutron_band ? k->neutron_band : a->band;
                a->band_upper = a->band_upper < k->neutron_band ? k->neutron_band
                                                                : a->band_upper;
            }
            /* no neutron rule in this table: the device still needs attention
             * (the cautious side; TG-203 would rate it high) */
            a->neutron_unrated = as->neutrons && k->neutron_band < 0;
            a->flagged |= a->neutron_unrated;
            if (a->neutron_unrated)
                sl_notes_add(&a->advice,
                             "a treatment beam of this plan may produce neutrons (photons of 10 "
                             "MV or more, or of unknown energy): this table (%s) has no "
                             "neutron rule; the AAPM TG-203 categories (models/"
                             "action-levels-tg203.yaml) rate such a treatment high risk",
                             k->bands_source);
            a->status = SL_ST_BAND;
            level_gy = k->bands[0].below_gy;
            a->flagged |= a->band >= 1 || a->band_upper >= 1;
        } else if (k && k->nlevels) {
            a->checks = calloc(k->nlevels, sizeof *a->checks);
            if (!a->checks) {
                sl_assessments_free(as);
                return sl_error_set(err, SL_ENOMEM, "out of memory");
            }
            for (size_t i = 0; i < k->nlevels; i++) {
                const sl_level *v = &k->levels[i];
                if (!sl_level_applies(v->weeks_from, v->weeks_to, pt->conception_weeks))
                    continue;
                a->checks[a->nchecks++] =
                    (sl_level_check){v, gy >= v->dose_gy, up >= v->dose_gy};
                if (!a->governing || v->dose_gy < a->governing->dose_gy)
                    a->governing = v;
            }
            if (a->governing) {
                level_gy = a->governing->dose_gy;
                a->status = gy >= level_gy   ? SL_ST_EXCEEDS
                            : up >= level_gy ? SL_ST_MAY_EXCEED
                                             : SL_ST_BELOW;
                a->flagged |= a->status != SL_ST_BELOW;
                if (is_kind(k, "fetus"))
                    fetus_verdict(a, gy, up);
            } else {
                a->status = SL_ST_NO_LEVEL;
            }
        } else {
            a->status = SL_ST_NO_LEVEL;
        }
        bool kindless = !k && !excluded_type && kind_unknown_eligible(d->roi->type);
        if (kindless && up >= table_lowest)
            kind_unknown(as, a, table_lowest, NULL);
        else if (kindless && as->nother > 0 && a->other_cgy == 0 && isfinite(table_lowest))
            /* beams this tool does not estimate leave its dose unknown, as
             * they leave an organ with levels incomplete */
            kind_unknown(as, a, table_lowest,
                         "the plan's other treatment beams are not estimated by this tool: "
                         "add their dose with --other-dose, or other_dose in a facts file");
        if (a->status != SL_ST_NOT_ASSESSED) /* no advice from a value not judged */
            advise(a, pt, level_gy);
        if (k && k->lar_table && a->status != SL_ST_NOT_ASSESSED) {
            a->lar = sl_levels_table(lv, k->lar_table);
            a->lar_mean_cgy = d->course_mean.cgy + a->other_cgy;
            if (a->lar && !isnan(pt->age_years) && pt->sex)
                a->lar_cases = sl_lar_cases(a->lar, pt->sex, pt->age_years, a->lar_mean_cgy / 100);
            else if (a->lar)
                lar_note = true;
        }
        as->any_flagged |= a->flagged;
    }
    if (lar_note)
        sl_notes_add(&as->notes, "give --age and --sex (or a plan with Patient's Sex and Birth "
                                 "Date) for lifetime cancer risks of the thyroid and breast "
                                 "(BEIR VII Phase 2 tables)");
    if (age_note)
        sl_notes_add(&as->notes, "the patient's age is not known (--age, or Patient's Birth Date "
                                 "and RT Plan Date in the plan): age-dependent statements (ovary) "
                                 "are left out");
    /* asked-for organs that are absent are never passed silently */
    if (!isnan(pt->conception_weeks) && !fetus_found) {
        sl_notes_add(&as->missing,
                     "fetus: not assessed: no fetus found (no ROI matches the fetus patterns or "
                     "--organ ROI=fetus, and no --fetus-point, --point or --landmark of kind "
                     "fetus): give its position, or measure its dose");
        as->any_flagged = true;
    }
    /* pacing dependence stated either way says the patient has a device */
    if ((pt->pacing_stated || pt->device_asked) && !device_found) {
        sl_notes_add(&as->missing,
                     "cardiac_device: not assessed: no device found (no ROI matches the device "
                     "patterns or --organ ROI=cardiac_device, and no --device-point, --point or "
                     "--landmark of kind cardiac_device): give its position, or measure its "
                     "dose");
        as->any_flagged = true;
    }
    missed_targets(e, as);
    if (as->n_incomplete)
        as->any_flagged = true;
    /* an advised measurement is attention too: the screening cannot settle
     * that organ by itself, so the exit code and the verdict must not read
     * as all clear */
    for (size_t i = 0; i < as->n; i++)
        if (as->items[i].measurement_advised) {
            as->n_measure++;
            as->any_flagged = true;
        }
    *out = as;
    return SL_OK;
}
