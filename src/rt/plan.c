/*
 * RT Plan data: freeing, lookups and the plan-level checks that a reader of
 * single elements cannot make (unique numbers, references that resolve, an
 * electron beam to estimate, no moving electron beam).
 */
#include "strayline/plan.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

static const char *const position_codes[SL_POS_COUNT] = {
    "HFS", "HFP", "FFS", "FFP", "HFDR", "HFDL", "FFDR", "FFDL",
};

const char *sl_position_code(sl_position p)
{
    return (unsigned)p < SL_POS_COUNT ? position_codes[p] : NULL;
}

bool sl_position_parse(const char *code, sl_position *out)
{
    if (!code)
        return false;
    for (int i = 0; i < SL_POS_COUNT; i++) {
        if (strcmp(code, position_codes[i]) == 0) {
            *out = (sl_position)i;
            return true;
        }
    }
    return false;
}

static void block_free(sl_block *b)
{
    free(b->name);
    free(b->tray_id);
    free(b->material);
    free(b->points);
}

static void beam_free(sl_beam *b)
{
    free(b->name);
    free(b->description);
    free(b->radiation_type);
    free(b->delivery_type);
    free(b->beam_type);
    free(b->machine);
    free(b->applicator.id);
    free(b->applicator.type);
    free(b->applicator.description);
    free(b->applicator.aperture_shape);
    for (size_t i = 0; i < b->nblocks; i++)
        block_free(&b->blocks[i]);
    free(b->blocks);
    free(b->bolus_roi_numbers);
}

void sl_plan_free(sl_plan *plan)
{
    if (!plan)
        return;
    free(plan->source);
    free(plan->sop_instance_uid);
    free(plan->label);
    free(plan->name);
    free(plan->patient_id);
    free(plan->patient_name);
    free(plan->patient_sex);
    free(plan->patient_birth_date);
    free(plan->plan_date);
    free(plan->frame_uid);
    free(plan->structure_set_uid);
    free(plan->study_uid);
    free(plan->approval_status);
    free(plan->review_date);
    free(plan->review_time);
    free(plan->reviewer_name);
    free(plan->setups);
    for (size_t i = 0; i < plan->ngroups; i++)
        free(plan->groups[i].refs);
    free(plan->groups);
    for (size_t i = 0; i < plan->ndose_refs; i++) {
        free(plan->dose_refs[i].type);
        free(plan->dose_refs[i].description);
    }
    free(plan->dose_refs);
    for (size_t i = 0; i < plan->nbeams; i++)
        beam_free(&plan->beams[i]);
    free(plan->beams);
    sl_notes_free(&plan->notes);
    free(plan);
}

static bool is(const char *s, const char *what)
{
    return s && strcmp(s, what) == 0;
}

bool sl_beam_delivers_dose(const sl_beam *beam)
{
    return !is(beam->delivery_type, "SETUP");
}

const char *sl_beam_skip_reason(const sl_beam *beam)
{
    if (!is(beam->radiation_type, "ELECTRON"))
        return "not an electron beam (only electron beams are estimated)";
    if (!sl_beam_delivers_dose(beam))
        return "a SETUP beam (Treatment Delivery Type: no beam is applied)";
    return NULL;
}

bool sl_beam_is_other_treatment(const sl_beam *beam)
{
    return sl_beam_delivers_dose(beam) && !is(beam->radiation_type, "ELECTRON");
}

const sl_beam *sl_plan_find_beam(const sl_plan *plan, int number)
{
    for (size_t i = 0; i < plan->nbeams; i++) {
        if (plan->beams[i].number == number)
            return &plan->beams[i];
    }
    return NULL;
}

const sl_setup *sl_plan_find_setup(const sl_plan *plan, int number)
{
    for (size_t i = 0; i < plan->nsetups; i++) {
        if (plan->setups[i].number == number)
            return &plan->setups[i];
    }
    return NULL;
}

sl_status sl_plan_beam_position(const sl_plan *plan, const sl_beam *beam, sl_position *pos,
                                sl_error *err)
{
    if (beam->setup_number >= 0) {
        const sl_setup *s = sl_plan_find_setup(plan, beam->setup_number);
        if (!s)
            return sl_error_set(err, SL_EINPUT,
                                "%s: beam %d: ReferencedPatientSetupNumber (300C,006A) %d: no "
                                "such patient setup",
                                plan->source, beam->number, beam->setup_number);
        *pos = s->position;
        return SL_OK;
    }
    if (plan->nsetups == 1) {
        *pos = plan->setups[0].position;
        return SL_OK;
    }
    return sl_error_set(err, SL_EINPUT,
                        "%s: beam %d: no ReferencedPatientSetupNumber (300C,006A) and the plan "
                        "has %zu patient setups: the patient position is unknown",
                        plan->source, beam->number, plan->nsetups);
}

sl_status sl_plan_validate(sl_plan *plan, sl_error *err)
{
    const char *f = plan->source ? plan->source : "(plan)";
    for (size_t i = 0; i < plan->nbeams; i++) {
        for (size_t j = 0; j < i; j++) {
            if (plan->beams[i].number == plan->beams[j].number)
                return sl_error_set(err, SL_EINPUT, "%s: BeamNumber (300A,00C0): duplicate beam "
                                                    "number %d",
                                    f, plan->beams[i].number);
        }
    }
    for (size_t i = 0; i < plan->nsetups; i++) {
        for (size_t j = 0; j < i; j++) {
            if (plan->setups[i].number == plan->setups[j].number)
                return sl_error_set(err, SL_EINPUT,
                                    "%s: PatientSetupNumber (300A,0182): duplicate setup number %d",
                                    f, plan->setups[i].number);
        }
    }
    for (size_t i = 0; i < plan->ngroups; i++) {
        const sl_fraction_group *g = &plan->groups[i];
        for (size_t j = 0; j < i; j++) {
            if (plan->groups[j].number == g->number)
                return sl_error_set(err, SL_EINPUT,
                                    "%s: FractionGroupNumber (300A,0071): duplicate fraction "
                                    "group number %d",
                                    f, g->number);
        }
        for (size_t k = 0; k < g->nrefs; k++) {
            if (!sl_plan_find_beam(plan, g->refs[k].beam_number))
                return sl_error_set(err, SL_EINPUT,
                                    "%s: fraction group %d: ReferencedBeamNumber (300C,0006) %d: "
                                    "no such beam in the Beam Sequence",
                                    f, g->number, g->refs[k].beam_number);
            for (size_t m = 0; m < k; m++) {
                if (g->refs[m].beam_number == g->refs[k].beam_number)
                    return sl_error_set(err, SL_EINPUT,
                                        "%s: fraction group %d: beam %d is referenced twice", f,
                                        g->number, g->refs[k].beam_number);
            }
        }
    }
    size_t electrons = 0;
    for (size_t i = 0; i < plan->nbeams; i++) {
        const sl_beam *b = &plan->beams[i];
        if (!is(b->radiation_type, "ELECTRON"))
            continue;
        electrons++;
        if (!sl_beam_delivers_dose(b)) {
            /* a setup beam is never delivered; one given monitor units
             * would be skipped with its dose (found by an independent
             * review: an electron SETUP beam of 480 MU passed in silence) */
            for (size_t g = 0; g < plan->ngroups; g++)
                for (size_t k = 0; k < plan->groups[g].nrefs; k++) {
                    const sl_beam_ref *r = &plan->groups[g].refs[k];
                    if (r->beam_number == b->number &&
                        (r->meterset_mu >= SL_MIN_TREATMENT_MU || r->beam_dose_gy > 0))
                        return sl_error_set(err, SL_EINPUT,
                                            "%s: beam %d is an electron beam of Treatment "
                                            "Delivery Type (300A,00CE) SETUP, yet fraction "
                                            "group %d gives it BeamMeterset (300A,0086) %.1f "
                                            "MU, Beam Dose (300A,0084) %.3g Gy: a setup beam "
                                            "delivers no dose; correct its type or its meterset",
                                            f, b->number, plan->groups[g].number,
                                            r->meterset_mu,
                                            r->beam_dose_gy > 0 ? r->beam_dose_gy : 0.0);
                }
            continue;
        }
        if (!is(b->beam_type, "STATIC"))
            return sl_error_set(err, SL_EINPUT,
                                "%s: beam %d: BeamType (300A,00C4) is %s: moving electron beams "
                                "are not handled (only STATIC)",
                                f, b->number, b->beam_type ? b->beam_type : "empty");
        sl_position pos;
        sl_status st = sl_plan_beam_position(plan, b, &pos, err);
        if (st != SL_OK)
            return st;
    }
    if (electrons == 0)
        return sl_error_set(err, SL_EINPUT,
                            "%s: no electron beams: photon plans are not handled", f);
    return SL_OK;
}
