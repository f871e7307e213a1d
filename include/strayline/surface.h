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
 * A bolus (a ROI typed BOLUS) is a solid of its own, built the same way;
 * sl_bodies_path counts the path through the union of a body and its
 * bolus, so that a bolus drawn overlapping the skin is counted once.
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
/* The same, its slices built on `threads` threads (0: every core). */
sl_status sl_body_create_threads(const sl_slice_stack *stack, const char *what, int threads,
                                 sl_body **out, sl_error *err);

/* Length (cm) of segment a -> b (patient coordinates, cm) inside the body,
 * or NAN when out of memory (a very dense body contour needs a scratch
 * buffer). *entry_t (may be NULL) receives the segment parameter in [0, 1]
 * where it first enters the body, or NAN when it never does. */
double sl_body_path(const sl_body *body, sl_vec3 a, sl_vec3 b, double *entry_t);

/* Stretches of a segment inside a solid: pairs (start, end) of segment
 * parameters in t[0..n). A caller may start it on a local buffer
 * (heap = false); it moves to the heap when it grows. */
typedef struct sl_spans {
    double *t;
    size_t n, cap;
    bool heap;
} sl_spans;

sl_status sl_spans_add(sl_spans *s, double t0, double t1);
void sl_spans_free(sl_spans *s);

/* Append the stretches of segment a -> b inside the body, in order along
 * the segment (stretches in neighbouring slabs may touch). SL_ENOMEM leaves
 * the list as it was. */
sl_status sl_body_spans(const sl_body *body, sl_vec3 a, sl_vec3 b, sl_spans *spans);

/* Length (cm) of segment a -> b inside the union of several solids (a body
 * and the bolus on it), each part counted once; *entry_t (may be NULL) as
 * for sl_body_path. NAN when out of memory. */
double sl_bodies_path(const sl_body *const *bodies, size_t nbodies, sl_vec3 a, sl_vec3 b,
                      double *entry_t);

bool sl_body_contains(const sl_body *body, sl_vec3 p);

/* The body indexed for rays from one source (a beam's): per slab, its
 * edges by the direction they subtend from the source and, along each
 * direction, the stretches free of edges with their parity, so that most
 * of a ray's slab pieces need no edge test at all. Exact: the same lengths
 * as sl_body_path (to rounding). *out is NULL, with SL_OK, when the source
 * lies over the body's box as seen along z, or so near it that the box
 * spans more than about 150 degrees from it (a beam nearly along the
 * patient's axis): use sl_body_path then. The fan borrows the body; it is
 * built on `threads` threads (0: every core) and is read-only after. */
typedef struct sl_body_fan sl_body_fan;

sl_status sl_body_fan_create(const sl_body *body, sl_vec3 source, int threads,
                             sl_body_fan **out, sl_error *err);

/* Length (cm) inside the body of the segment from the fan's source to p;
 * *entry_t as for sl_body_path. NAN when out of memory. */
double sl_body_fan_path(const sl_body_fan *fan, sl_vec3 p, double *entry_t);

/* The same through the union of several solids' fans of one source (a body
 * and its bolus), each part counted once. */
double sl_fans_path(const sl_body_fan *const *fans, size_t nfans, sl_vec3 p, double *entry_t);

void sl_body_fan_free(sl_body_fan *fan);

/* Bounding box of the body (cm). */
void sl_body_bounds(const sl_body *body, sl_vec3 *lo, sl_vec3 *hi);

void sl_body_free(sl_body *body);

#ifdef __cplusplus
}
#endif

#endif
