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

/* An organ with action levels that this screening cannot judge (in the
 * field, beyond the model's range, not placed) is counted so that no
 * headline reads as all clear. A fetus or a cardiac device left unjudged
 * needs attention in itself (common practice: their doses are documented). */
static void unjudged(sl_assessments *as, sl_assessment *a)
{
    if (!a->kind || (a->kind->nlevels == 0 && a->kind->nbands == 0))
        return;
    as->n_unjudged++;
    bool critical = a->kind->nbands > 0 || strcmp(a->kind->kind, "fetus") == 0;
    if (critical) {
        a->flagged = true;
        a->measurement_advised = true;
    }
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

static void advise(sl_assessment *a, const sl_patient *pt, double level_gy)
{
    const sl_organ_dose *d = a->dose;
    double gy = d->course_max.cgy / 100, up = d->course_max.upper_cgy / 100;
    /* an unjudged organ is flagged for measurement, not for a shield */
    if (a->flagged && a->status != SL_ST_NOT_ASSESSED) {
        if (d->electron_fraction > 0.5) {
            a->shield_advised = true;
            a->shield_energy_mev = d->max_energy_mev;
            a->lead_mm = sl_lead_mm(d->max_energy_mev);
            a->alloy_mm = sl_alloy_mm(d->max_energy_mev);
            sl_notes_add(&a->advice,
                         "shield: most of this dose (%.0f %%) is from electrons: at least %.1f mm "
                         "of lead over the organ for %g MeV (E/2 mm, Radiother Oncol 80:391 "
                         "(2006), plus a 1 mm margin, textbook rule), or about %.1f mm of "
                         "low-melting-point alloy (1.2 x lead, from memory)",
                         100 * d->electron_fraction, a->lead_mm, d->max_energy_mev, a->alloy_mm);
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
        snprintf(buf, sizeof buf, "the upper bound (%.3g Gy) is at least half the level (%.3g Gy)",
                 up, level_gy);
        why = buf;
    } else if (d->flags & SL_MF_EXTRAPOLATED) {
        why = "the value is extrapolated beyond the measured distances";
    } else if (d->flags & SL_MF_OPEN_FOR_CUTOUT &&
               (isfinite(level_gy) || (a->kind && a->kind->nbands))) {
        why = "the cutout is not commissioned (a conservative stand-in is used: measure the "
              "cutout's profiles)";
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
        if (!sl_level_applies(s->weeks_from, s->weeks_to, pt->gestational_weeks))
            continue;
        if (isfinite(s->per_gy))
            sl_notes_add(&a->statements, "%s: for %.3g Gy, about %.2g %% (%s; %s)", s->text, gy,
                         100 * s->per_gy * gy, s->source, s->mark);
        else
            sl_notes_add(&a->statements, "%s (%s; %s)", s->text, s->source, s->mark);
    }
}

sl_status sl_assess(const sl_levels *lv, const sl_estimate *e, const sl_patient *pt,
                    const sl_organ_map *map, size_t nmap, sl_assessments **out, sl_error *err)
{
    *out = NULL;
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
    as->patient = *pt;
    as->n = e->norgans;
    as->items = calloc(e->norgans ? e->norgans : 1, sizeof *as->items);
    if (!as->items) {
        sl_assessments_free(as);
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    }
    bool lar_note = false;
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
        if (a->kind && strcmp(a->kind->kind, "fetus") == 0 && isnan(pt->gestational_weeks)) {
            sl_status st = sl_error_set(err, SL_EUSAGE,
                                        "ROI '%s' is a fetus: give its gestational age with "
                                        "--gestational-age WEEKS",
                                        d->roi->name);
            sl_assessments_free(as);
            return st;
        }
        if (!d->estimated) {
            a->status = d->in_field ? SL_ST_IN_FIELD : SL_ST_NOT_ASSESSED;
            a->not_assessed_why = d->excluded_why;
            const char *why;
            /* a target volume (or other excluded type) is not an organ left
             * unjudged, whatever its name matches */
            if (!sl_dose_type_excluded(d->roi->type, e->opt.include_targets, &why))
                unjudged(as, a);
            as->any_flagged |= a->flagged;
            continue;
        }
        /* beyond the model's range, for the nearest beam */
        for (size_t b = 0; b < e->nbeams; b++) {
            const sl_organ_place *p = &e->loc->beams[b].organs[o];
            double lo, hi;
            sl_curves_range(e->beams[b].curves, &lo, &hi);
            if (p->min_distance_cm <= d->min_distance_cm + 1e-9 &&
                p->min_distance_cm > SL_BEYOND_RANGE_FACTOR * hi) {
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
            a->not_assessed_why = "near the field edge (closer than 1 cm): the planning system's "
                                  "dose is the reference here; the model's value is shown, not "
                                  "judged";
        }
        double gy = d->course_max.cgy / 100, up = d->course_max.upper_cgy / 100;
        double level_gy = NAN;
        const sl_kind *k = a->kind;
        if (a->status == SL_ST_NOT_ASSESSED) {
            unjudged(as, a);
        } else if (k && k->nbands) {
            a->band = band_of(k, gy);
            a->band_upper = band_of(k, up);
            if (pt->pacing_dependent) {
                int top = (int)k->nbands - 1;
                a->band = a->band + k->pacing_shift > top ? top : a->band + k->pacing_shift;
                a->band_upper = a->band_upper + k->pacing_shift > top
                                    ? top
                                    : a->band_upper + k->pacing_shift;
            }
            a->status = SL_ST_BAND;
            level_gy = k->bands[0].below_gy;
            a->flagged = a->band >= 1 || a->band_upper >= 1;
        } else if (k && k->nlevels) {
            a->checks = calloc(k->nlevels, sizeof *a->checks);
            if (!a->checks) {
                sl_assessments_free(as);
                return sl_error_set(err, SL_ENOMEM, "out of memory");
            }
            for (size_t i = 0; i < k->nlevels; i++) {
                const sl_level *v = &k->levels[i];
                if (!sl_level_applies(v->weeks_from, v->weeks_to, pt->gestational_weeks))
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
                a->flagged = a->status != SL_ST_BELOW;
            } else {
                a->status = SL_ST_NO_LEVEL;
            }
        } else {
            a->status = SL_ST_NO_LEVEL;
        }
        if (a->status != SL_ST_NOT_ASSESSED) /* no advice from a value not judged */
            advise(a, pt, level_gy);
        if (k && k->lar_table && a->status != SL_ST_NOT_ASSESSED) {
            a->lar = sl_levels_table(lv, k->lar_table);
            if (a->lar && !isnan(pt->age_years) && pt->sex)
                a->lar_cases = sl_lar_cases(a->lar, pt->sex, pt->age_years, d->course_mean.cgy / 100);
            else if (a->lar)
                lar_note = true;
        }
        as->any_flagged |= a->flagged;
    }
    if (lar_note)
        sl_notes_add(&as->notes, "give --age and --sex for lifetime cancer risks of the thyroid "
                                 "and breast (BEIR VII Phase 2 tables)");
    *out = as;
    return SL_OK;
}
