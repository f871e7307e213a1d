/*
 * strayline: the body (the EXTERNAL ROI) as a solid, for depths along rays.
 *
 * The body is the slab stack of its axial contours (slices.h). The depth of
 * a point is the water-equivalent path length from the source to it: the
 * length of the ray that lies inside the body (unit density; strayline uses
 * no CT numbers). For a convex body surface this is the distance below the
 * surface along the ray; where a ray leaves and re-enters the body (over a
 * chin, a shoulder) only the tissue counts.
 *
 * Each slice has a uniform grid listing the edges that pass through each
 * cell and the parity (inside or not) of each cell centre, so a segment is
 * followed cell by cell and only nearby edges are tested. Exact, no voxels.
 * Immutable once built; safe to query from many threads.
 */
#ifndef STRAYLINE_SURFACE_H
#define STRAYLINE_SURFACE_H

#include <stdbool.h>

#include "strayline/error.h"
#include "strayline/slices.h"

#ifdef __cplusplus
extern "C" {
#endif

typedef struct sl_body sl_body;

/* Build the body from the EXTERNAL ROI (a stack with at least one slice). */
sl_status sl_body_create(const sl_slice_stack *stack, const char *what, sl_body **out,
                         sl_error *err);

/* Length (cm) of segment a -> b (patient coordinates, cm) inside the body,
 * or NAN when out of memory (a very dense body contour needs a scratch
 * buffer). *entry_t (may be NULL) receives the segment parameter in [0, 1]
 * where it first enters the body, or NAN when it never does. */
double sl_body_path(const sl_body *body, sl_vec3 a, sl_vec3 b, double *entry_t);

bool sl_body_contains(const sl_body *body, sl_vec3 p);

/* Bounding box of the body (cm). */
void sl_body_bounds(const sl_body *body, sl_vec3 *lo, sl_vec3 *hi);

void sl_body_free(sl_body *body);

#ifdef __cplusplus
}
#endif

#endif
