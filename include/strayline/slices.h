/*
 * strayline: a ROI's closed planar contours as a stack of axial slabs.
 *
 * Contours on one axial plane are grouped into a slice and combined by the
 * even-odd rule (holes, islands, CLOSEDPLANAR_XOR alike). Each slice stands
 * for a slab reaching half way to its neighbouring slices; the first and
 * last reach half their own spacing beyond (or half a default thickness for
 * a ROI drawn on a single slice). Points are converted from the file's mm to
 * cm here. Contours that are not axial (z varying within the contour) are an
 * input error: strayline handles axial contours only.
 *
 * The body model (surface.h) and the organ sampler (sampling.h) both build
 * on this.
 */
#ifndef STRAYLINE_SLICES_H
#define STRAYLINE_SLICES_H

#include <stddef.h>

#include "strayline/error.h"
#include "strayline/structures.h"

#ifdef __cplusplus
extern "C" {
#endif

typedef struct sl_slice {
    double z_cm;           /* plane of the contours */
    double z_lo_cm, z_hi_cm; /* slab it stands for */
    size_t first, count;   /* loops [first, first + count) of the stack */
} sl_slice;

typedef struct sl_slice_stack {
    size_t nslices;
    sl_slice *slices;      /* sorted by z */
    size_t nloops;
    sl_vec2 **loops;       /* cm, closing point not repeated */
    size_t *loop_n;
    size_t ignored_open;   /* OPEN_* contours skipped */
    size_t ignored_points; /* POINT contours skipped */
    size_t ignored_small;  /* closed contours with fewer than 3 distinct points */
    size_t ignored_flat;   /* closed contours that enclose no area (collinear
                              points, or a figure eight whose halves cancel) */
    size_t repeated_points;/* consecutive duplicate points removed */
} sl_slice_stack;

/* Build the stack of a ROI's closed contours. `file` names the structure
 * set in messages. A ROI with no usable closed contour gives an empty stack
 * (nslices == 0), not an error, unless every closed contour it has
 * encloses no area: that is an input error naming the first of them. */
sl_status sl_slices_build(const sl_roi *roi, const char *file, double default_thickness_cm,
                          sl_slice_stack *out, sl_error *err);

/* Median spacing (cm) between the slices of every closed ROI of a structure
 * set, or `fallback` when no ROI has two slices. */
double sl_slices_typical_spacing(const sl_structure_set *ss, double fallback);

void sl_slices_free(sl_slice_stack *s);

#ifdef __cplusplus
}
#endif

#endif
