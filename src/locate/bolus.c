/*
 * Bolus in the placement stage (see include/strayline/locate.h).
 *
 * Bolus is tissue-equivalent material laid on the skin; an electron beam's
 * depth dose, and so the depth the out-of-field model is read at, counts it
 * like tissue. The plan says which bolus a beam uses in its Referenced
 * Bolus Sequence (DICOM PS3.3 C.8.8.14); a bolus ROI is one typed BOLUS
 * (RT ROI Interpreted Type, PS3.3 C.8.8.8). When the beam names none but the
 * structure set holds a BOLUS ROI, it is counted all the same (a bolus left
 * out makes depths read shallower than they are) and the reports say so, so
 * that the user can check it was on for this beam, or see the difference
 * with the no_bolus what-if.
 *
 * Each bolus ROI is built once as a solid (surface.h) and shared by every
 * beam that uses it; a beam's depths go through the union of the body and
 * its bolus, so a bolus drawn overlapping the skin is not counted twice.
 */
#include "bolus.h"
#include "strayline/slices.h"
#include "strayline/surface.h"

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

static bool typed_bolus(const sl_roi *r)
{
    return r->type && strcmp(r->type, "BOLUS") == 0;
}

static const sl_roi *roi_by_number(const sl_structure_set *ss, int number)
{
    for (size_t i = 0; i < ss->nrois; i++)
        if (ss->rois[i].number == number)
            return &ss->rois[i];
    return NULL;
}

/* The solid of a bolus ROI, built at its first use; *solid is NULL when it
 * has no closed contour. */
static sl_status bolus_solid(sl_location *loc, const sl_structure_set *ss, const sl_roi *roi,
                             const sl_body **solid, sl_error *err)
{
    *solid = NULL;
    for (size_t i = 0; i < loc->nbolus_solids; i++) {
        if (loc->bolus_rois[i] == roi) {
            *solid = loc->bolus_solids[i];
            return SL_OK;
        }
    }
    if (!loc->bolus_rois) {
        size_t n = ss->nrois ? ss->nrois : 1;
        loc->bolus_rois = calloc(n, sizeof *loc->bolus_rois);
        loc->bolus_solids = calloc(n, sizeof *loc->bolus_solids);
        if (!loc->bolus_rois || !loc->bolus_solids)
            return sl_error_set(err, SL_ENOMEM, "out of memory");
    }
    sl_slice_stack stack;
    sl_status st = sl_slices_build(roi, ss->source, loc->slice_spacing_cm, &stack, err);
    if (st != SL_OK)
        return st;
    sl_body *b = NULL;
    if (stack.nslices > 0) {
        char what[256];
        snprintf(what, sizeof what, "%s: bolus ROI '%s'", ss->source, roi->name);
        st = sl_body_create(&stack, what, &b, err);
    }
    sl_slices_free(&stack);
    if (st != SL_OK)
        return st;
    /* a ROI never repeats here, so the list stays within nrois */
    loc->bolus_rois[loc->nbolus_solids] = roi;
    loc->bolus_solids[loc->nbolus_solids++] = b;
    *solid = b;
    return SL_OK;
}

static bool picked(const sl_beam_place *bp, const sl_roi *r)
{
    for (size_t i = 0; i < bp->nboli; i++)
        if (bp->boli[i] == r)
            return true;
    return false;
}

sl_status sl_locate_bolus(sl_location *loc, const sl_structure_set *ss,
                          const sl_locate_options *opt, sl_beam_place *bp, sl_error *err)
{
    const sl_beam *beam = bp->beam;
    const char *file = ss->source;
    size_t cap = beam->nboli + ss->nrois + 1;
    bp->boli = calloc(cap, sizeof *bp->boli);
    const sl_body **solids = calloc(cap, sizeof *solids);
    bp->parts = calloc(cap + 1, sizeof *bp->parts);
    if (!bp->boli || !solids || !bp->parts) {
        free(solids);
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    }
    bp->nboli = 0;
    bp->boli_from = SL_BOLUS_NONE;
    bp->boli_counted = !opt->no_bolus;
    sl_status st = SL_OK;
    if (beam->nboli > 0) {
        for (size_t k = 0; k < beam->nboli && st == SL_OK; k++) {
            int number = beam->bolus_roi_numbers[k];
            const sl_roi *r = roi_by_number(ss, number);
            if (!r) {
                sl_notes_add(&bp->notes,
                             "beam %d: its Referenced Bolus Sequence names ROI number %d, which "
                             "%s does not have: that bolus is not counted in depths (they may "
                             "read too shallow)",
                             beam->number, number, file);
                continue;
            }
            if (r == loc->external) {
                sl_notes_add(&bp->notes,
                             "beam %d: its Referenced Bolus Sequence names the EXTERNAL ROI "
                             "'%s': the body contour is taken to hold the bolus already",
                             beam->number, r->name);
                continue;
            }
            if (picked(bp, r))
                continue;
            const sl_body *solid;
            if ((st = bolus_solid(loc, ss, r, &solid, err)) != SL_OK)
                break;
            if (!solid) {
                sl_notes_add(&bp->notes,
                             "beam %d: its bolus ROI '%s' has no closed contour: it is not "
                             "counted in depths (they may read too shallow)",
                             beam->number, r->name);
                continue;
            }
            if (!typed_bolus(r))
                sl_notes_add(&bp->notes,
                             "beam %d: ROI '%s' is named as its bolus but typed %s, not BOLUS: "
                             "it is counted as bolus",
                             beam->number, r->name, r->type ? r->type : "(no type)");
            solids[bp->nboli] = solid;
            bp->boli[bp->nboli++] = r;
        }
        if (bp->nboli)
            bp->boli_from = SL_BOLUS_REFERENCED;
        for (size_t i = 0; i < ss->nrois && st == SL_OK; i++) {
            const sl_roi *r = &ss->rois[i];
            if (typed_bolus(r) && !picked(bp, r))
                sl_notes_add(&bp->notes,
                             "beam %d: ROI '%s' is typed BOLUS but the beam does not name it "
                             "(Referenced Bolus Sequence): it is not counted for this beam",
                             beam->number, r->name);
        }
    } else {
        for (size_t i = 0; i < ss->nrois && st == SL_OK; i++) {
            const sl_roi *r = &ss->rois[i];
            if (!typed_bolus(r) || r == loc->external)
                continue;
            const sl_body *solid;
            if ((st = bolus_solid(loc, ss, r, &solid, err)) != SL_OK)
                break;
            if (!solid) {
                sl_notes_add(&bp->notes,
                             "ROI '%s' is typed BOLUS but has no closed contour: it is not "
                             "counted in depths",
                             r->name);
                continue;
            }
            solids[bp->nboli] = solid;
            bp->boli[bp->nboli++] = r;
        }
        if (bp->nboli)
            bp->boli_from = SL_BOLUS_TYPED;
    }
    if (st != SL_OK) {
        free(solids);
        return st;
    }
    bp->parts[bp->nparts++] = loc->body;
    for (size_t i = 0; bp->boli_counted && i < bp->nboli; i++)
        bp->parts[bp->nparts++] = solids[i];
    free(solids);
    return SL_OK;
}

void sl_locate_bolus_free(sl_location *loc)
{
    for (size_t b = 0; b < loc->nbeams; b++) {
        free(loc->beams[b].boli);
        free(loc->beams[b].parts);
    }
    for (size_t i = 0; i < loc->nbolus_solids; i++)
        sl_body_free(loc->bolus_solids[i]);
    free(loc->bolus_solids);
    free(loc->bolus_rois);
    sl_body_free(loc->body);
}

double sl_location_depth(const sl_location *loc, const sl_beam_place *bp, sl_vec3 p)
{
    if (!loc->depth_from_body)
        return loc->depth_cm;
    return sl_bodies_path((const sl_body *const *)bp->parts, bp->nparts,
                          sl_frame_source(&bp->frame), p, NULL);
}
