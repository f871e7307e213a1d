/*
 * strayline: field outlines in a plane and the signed distance from them.
 *
 * An outline is a set of simple, mutually non-crossing closed loops (cm),
 * combined by the even-odd rule: a cutout, an applicator opening, an opening
 * with shielding blocks as holes. The signed distance of a point is its
 * distance from the nearest edge, negative inside. Loops are oriented so
 * that the region lies on their left, which lets the sign come from the
 * nearest edge or vertex alone (no full parity count).
 *
 * Queries are made fast, and their cost independent of the number of
 * vertices, by an index built over the region where the queries will fall:
 * a grid whose every cell lists only the edges that can be nearest to some
 * point of that cell (those within the cell's own nearest distance plus its
 * diameter). The answer is exact, not interpolated.
 *
 * An outline is immutable once indexed and may be queried from many threads.
 */
#ifndef STRAYLINE_OUTLINE_H
#define STRAYLINE_OUTLINE_H

#include <stdbool.h>
#include <stddef.h>

#include "strayline/error.h"
#include "strayline/plan.h"

#ifdef __cplusplus
extern "C" {
#endif

typedef struct sl_outline sl_outline;

/* Most vertices an outline may have, over all its loops. The check that it
 * is a simple polygon compares edge pairs; cutouts and apertures have tens
 * to a few thousand vertices. */
#define SL_OUTLINE_MAX_VERTICES 20000

typedef struct sl_outline_loop {
    const sl_vec2 *points; /* cm; closing point not repeated (a repeated one is dropped) */
    size_t n;
} sl_outline_loop;

/* Build an outline. `what` names it in messages ("beam 1 cutout"). Input
 * errors: a loop with fewer than 3 distinct points, no area, a loop that
 * crosses itself or folds back, two loops that cross or touch. */
sl_status sl_outline_create(const sl_outline_loop *loops, size_t nloops, const char *what,
                            sl_outline **out, sl_error *err);

/* Rectangle centred on the origin, and a circle as a 360-gon (cm). */
sl_status sl_outline_rectangle(double width_cm, double height_cm, const char *what,
                               sl_outline **out, sl_error *err);
sl_status sl_outline_circle(double diameter_cm, const char *what, sl_outline **out,
                            sl_error *err);

/* A copy scaled about the origin. */
sl_status sl_outline_scaled(const sl_outline *o, double factor, sl_outline **out, sl_error *err);

/* Index the outline for queries in the box [lo, hi] (any box; points
 * outside it are answered too, by a scan of every edge). */
sl_status sl_outline_index(sl_outline *o, sl_vec2 lo, sl_vec2 hi, sl_error *err);

/* Signed distance (cm): > 0 outside, < 0 inside, 0 on the edge. */
double sl_outline_distance(const sl_outline *o, sl_vec2 q);

double sl_outline_area(const sl_outline *o);          /* cm^2, even-odd */
void sl_outline_bounds(const sl_outline *o, sl_vec2 *lo, sl_vec2 *hi);
size_t sl_outline_loop_count(const sl_outline *o);
/* Whether sl_outline_index would split the outline at all: one with few
 * edges is one leaf however large its box, and its distances are the same
 * without the box. */
bool sl_outline_index_splits(const sl_outline *o);
/* One loop, every corner convex: a convex region. */
bool sl_outline_convex(const sl_outline *o);
const sl_vec2 *sl_outline_loop_points(const sl_outline *o, size_t i, size_t *n);
/* Nesting depth of loop i (0 outermost): even = an opening, odd = a hole. */
int sl_outline_loop_depth(const sl_outline *o, size_t i);

void sl_outline_free(sl_outline *o);

#ifdef __cplusplus
}
#endif

#endif
