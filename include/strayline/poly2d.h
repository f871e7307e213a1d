/*
 * strayline: small planar geometry primitives shared by the outline, body
 * and sampling code. Inline, because they sit in the innermost loops.
 *
 * The crossing test is the one rule that parity (inside/outside) decisions
 * depend on everywhere: an edge PQ crosses a segment AB when P and Q lie on
 * different sides of the line AB, with a point exactly on the line counted
 * on the "not above" side (the half-open rule of the classic ray-crossing
 * test, turned to any direction), and the crossing parameter along AB lies
 * in [0, 1). Counted this way, a vertex exactly on AB is crossed once or not
 * at all, never twice, so parities stay consistent.
 */
#ifndef STRAYLINE_POLY2D_H
#define STRAYLINE_POLY2D_H

#include <math.h>
#include <stdbool.h>

#include "strayline/plan.h"

static inline double sl_p2_cross(sl_vec2 o, sl_vec2 a, sl_vec2 b)
{
    return (a.x - o.x) * (b.y - o.y) - (a.y - o.y) * (b.x - o.x);
}

/* Squared distance from q to segment ab, and the parameter of the nearest
 * point (clamped to [0, 1]). */
static inline double sl_p2_seg_dist2(sl_vec2 q, sl_vec2 a, sl_vec2 b, double *t_out)
{
    double dx = b.x - a.x, dy = b.y - a.y;
    double len2 = dx * dx + dy * dy;
    double t = len2 > 0 ? ((q.x - a.x) * dx + (q.y - a.y) * dy) / len2 : 0.0;
    if (t < 0)
        t = 0;
    else if (t > 1)
        t = 1;
    double px = a.x + t * dx - q.x, py = a.y + t * dy - q.y;
    if (t_out)
        *t_out = t;
    return px * px + py * py;
}

/* Does edge pq cross segment ab (half-open rule above)? If so, *s receives
 * the crossing parameter along ab. */
static inline bool sl_p2_crosses(sl_vec2 a, sl_vec2 b, sl_vec2 p, sl_vec2 q, double *s)
{
    double dp = sl_p2_cross(a, b, p), dq = sl_p2_cross(a, b, q);
    if ((dp > 0) == (dq > 0))
        return false;
    /* p and q straddle the line ab; where does pq meet it, along ab? */
    double ea = sl_p2_cross(p, q, a), eb = sl_p2_cross(p, q, b);
    double den = ea - eb;
    if (den == 0)
        return false;
    double t = ea / den;
    if (!(t >= 0 && t < 1))
        return false;
    if (s)
        *s = t;
    return true;
}

/* Signed area of a closed polygon (positive when counter-clockwise). */
static inline double sl_p2_area(const sl_vec2 *pts, size_t n)
{
    double a = 0;
    for (size_t i = 0, j = n - 1; i < n; j = i++)
        a += pts[j].x * pts[i].y - pts[i].x * pts[j].y;
    return 0.5 * a;
}

/* Whether q lies inside a closed polygon, by the even-odd rule (crossings
 * of a ray towards +x); a point on an edge may fall either way. */
static inline bool sl_p2_inside(sl_vec2 q, const sl_vec2 *p, size_t n)
{
    bool in = false;
    for (size_t i = 0, j = n - 1; i < n; j = i++) {
        if ((p[i].y > q.y) != (p[j].y > q.y) &&
            q.x < (p[j].x - p[i].x) * (q.y - p[i].y) / (p[j].y - p[i].y) + p[i].x)
            in = !in;
    }
    return in;
}

/* Proper or touching intersection of segments ab and cd (for validity checks). */
static inline bool sl_p2_segments_meet(sl_vec2 a, sl_vec2 b, sl_vec2 c, sl_vec2 d)
{
    double d1 = sl_p2_cross(c, d, a), d2 = sl_p2_cross(c, d, b);
    double d3 = sl_p2_cross(a, b, c), d4 = sl_p2_cross(a, b, d);
    if (((d1 > 0 && d2 < 0) || (d1 < 0 && d2 > 0)) && ((d3 > 0 && d4 < 0) || (d3 < 0 && d4 > 0)))
        return true;
    /* collinear touching */
    if (d1 == 0 && fmin(c.x, d.x) <= a.x && a.x <= fmax(c.x, d.x) && fmin(c.y, d.y) <= a.y &&
        a.y <= fmax(c.y, d.y))
        return true;
    if (d2 == 0 && fmin(c.x, d.x) <= b.x && b.x <= fmax(c.x, d.x) && fmin(c.y, d.y) <= b.y &&
        b.y <= fmax(c.y, d.y))
        return true;
    if (d3 == 0 && fmin(a.x, b.x) <= c.x && c.x <= fmax(a.x, b.x) && fmin(a.y, b.y) <= c.y &&
        c.y <= fmax(a.y, b.y))
        return true;
    if (d4 == 0 && fmin(a.x, b.x) <= d.x && d.x <= fmax(a.x, b.x) && fmin(a.y, b.y) <= d.y &&
        d.y <= fmax(a.y, b.y))
        return true;
    return false;
}

#endif
