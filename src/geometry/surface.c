/*
 * The body solid and in-body path lengths (see include/strayline/surface.h).
 *
 * A 3-D segment is cut at the slab boundaries; inside one slab the body's
 * cross-section does not change, so the in-body part of the segment there is
 * the in-polygon part of its 2-D projection. That part is found by walking
 * the projection through the slice's grid (a DDA walk) and toggling at each
 * edge crossing; the parity where the walk starts comes from the parity of
 * the cell centre plus the crossings between the centre and the start.
 * Crossings are assigned to the cell whose stretch of the segment contains
 * them, so an edge listed in several cells is never counted twice.
 */
#include "strayline/surface.h"
#include "strayline/poly2d.h"

#include <float.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

#define GRID_MAX 64
/* Most edges one grid cell may list. A body contour denser than this in
 * one cell is refused; clinical body contours list tens of edges a cell,
 * which the walk keeps on the stack (LOCAL_EDGES), going to the heap only
 * for denser bodies. */
#define MAX_CELL_EDGES 8192
#define LOCAL_EDGES 128
/* An odd margin around each slice, so that cell centres do not fall on
 * the round coordinates that phantom edges like to sit on. */
#define MARGIN_CM 1.0031416

typedef struct bslice {
    double z_lo, z_hi;
    sl_vec2 lo, hi;
    double cell;
    int gx, gy;
    size_t ne;
    sl_vec2 *ea, *eb;
    size_t *cell_start;
    size_t *cell_edges;
    size_t max_cell;       /* most edges listed by one cell */
    unsigned char *center_in;
} bslice;

struct sl_body {
    size_t n;
    bslice *s;
    sl_vec3 lo, hi;
};

static int cmp_double(const void *a, const void *b)
{
    double x = *(const double *)a, y = *(const double *)b;
    return x < y ? -1 : x > y;
}

static void slice_free(bslice *s)
{
    free(s->ea);
    free(s->eb);
    free(s->cell_start);
    free(s->cell_edges);
    free(s->center_in);
}

void sl_body_free(sl_body *b)
{
    if (!b)
        return;
    for (size_t i = 0; i < b->n; i++)
        slice_free(&b->s[i]);
    free(b->s);
    free(b);
}

/* fmin and fmax are library calls (NaN rules) and were a tenth of the
 * depth tracing; the values here are never NaN. */
static inline double dmin(double a, double b)
{
    return a < b ? a : b;
}

static inline double dmax(double a, double b)
{
    return a > b ? a : b;
}

/* The cell of coordinate f (in cells from the grid's low corner) among n,
 * clamped: for f >= 0 truncation is the floor, without a call to floor(). */
static inline int cell_index(double f, int n)
{
    if (!(f >= 0))
        return 0;
    if (f >= n)
        return n - 1;
    return (int)f;
}

static int clampi(long v, int lo, int hi)
{
    return v < lo ? lo : v > hi ? hi : (int)v;
}

static sl_status slice_build(const sl_slice_stack *st, const sl_slice *sl, bslice *s)
{
    s->z_lo = sl->z_lo_cm;
    s->z_hi = sl->z_hi_cm;
    size_t ne = 0;
    for (size_t k = 0; k < sl->count; k++)
        ne += st->loop_n[sl->first + k];
    s->ne = ne;
    s->ea = malloc(ne * sizeof *s->ea);
    s->eb = malloc(ne * sizeof *s->eb);
    if (!s->ea || !s->eb)
        return SL_ENOMEM;
    sl_vec2 lo = {DBL_MAX, DBL_MAX}, hi = {-DBL_MAX, -DBL_MAX};
    size_t e = 0;
    for (size_t k = 0; k < sl->count; k++) {
        const sl_vec2 *p = st->loops[sl->first + k];
        size_t n = st->loop_n[sl->first + k];
        for (size_t i = 0; i < n; i++) {
            s->ea[e] = p[i];
            s->eb[e] = p[(i + 1) % n];
            e++;
            lo.x = fmin(lo.x, p[i].x);
            lo.y = fmin(lo.y, p[i].y);
            hi.x = fmax(hi.x, p[i].x);
            hi.y = fmax(hi.y, p[i].y);
        }
    }
    lo.x -= MARGIN_CM;
    lo.y -= MARGIN_CM;
    hi.x += MARGIN_CM;
    hi.y += MARGIN_CM;
    s->lo = lo;
    s->hi = hi;
    double w = hi.x - lo.x, h = hi.y - lo.y;
    double cells = fmin((double)GRID_MAX, fmax(4.0, 2.0 * sqrt((double)ne)));
    s->cell = fmax(w, h) / cells;
    s->gx = clampi((long)ceil(w / s->cell), 1, GRID_MAX);
    s->gy = clampi((long)ceil(h / s->cell), 1, GRID_MAX);
    size_t ncell = (size_t)s->gx * (size_t)s->gy;
    s->cell_start = calloc(ncell + 1, sizeof *s->cell_start);
    s->center_in = calloc(ncell, 1);
    if (!s->cell_start || !s->center_in)
        return SL_ENOMEM;

    /* edges to cells (their bounding box, slightly widened so that a
     * crossing on a cell boundary is listed on both sides) */
    const double eps = 1e-6;
    for (int pass = 0; pass < 2; pass++) {
        if (pass == 1) {
            size_t total = 0;
            for (size_t c = 0; c < ncell; c++) {
                size_t k = s->cell_start[c];
                if (k > MAX_CELL_EDGES)
                    return SL_EINPUT;
                if (k > s->max_cell)
                    s->max_cell = k;
                s->cell_start[c] = total;
                total += k;
            }
            s->cell_start[ncell] = total;
            s->cell_edges = malloc((total ? total : 1) * sizeof *s->cell_edges);
            if (!s->cell_edges)
                return SL_ENOMEM;
        }
        size_t *fill = NULL;
        if (pass == 1) {
            fill = malloc(ncell * sizeof *fill);
            if (!fill)
                return SL_ENOMEM;
            memcpy(fill, s->cell_start, ncell * sizeof *fill);
        }
        for (size_t i = 0; i < ne; i++) {
            int x0 = cell_index((fmin(s->ea[i].x, s->eb[i].x) - eps - lo.x) / s->cell, s->gx);
            int x1 = cell_index((fmax(s->ea[i].x, s->eb[i].x) + eps - lo.x) / s->cell, s->gx);
            int y0 = cell_index((fmin(s->ea[i].y, s->eb[i].y) - eps - lo.y) / s->cell, s->gy);
            int y1 = cell_index((fmax(s->ea[i].y, s->eb[i].y) + eps - lo.y) / s->cell, s->gy);
            for (int cy = y0; cy <= y1; cy++)
                for (int cx = x0; cx <= x1; cx++) {
                    size_t c = (size_t)cy * (size_t)s->gx + (size_t)cx;
                    if (pass == 0)
                        s->cell_start[c]++;
                    else
                        s->cell_edges[fill[c]++] = i;
                }
        }
        free(fill);
    }

    /* parity of every cell centre: one horizontal scan a row */
    double *xs = malloc((ne ? ne : 1) * sizeof *xs);
    if (!xs)
        return SL_ENOMEM;
    for (int cy = 0; cy < s->gy; cy++) {
        double y = lo.y + (cy + 0.5) * s->cell;
        size_t nx = 0;
        for (size_t i = 0; i < ne; i++) {
            sl_vec2 a = s->ea[i], b = s->eb[i];
            if ((a.y > y) != (b.y > y))
                xs[nx++] = a.x + (y - a.y) * (b.x - a.x) / (b.y - a.y);
        }
        qsort(xs, nx, sizeof *xs, cmp_double);
        size_t k = 0;
        for (int cx = 0; cx < s->gx; cx++) {
            double x = lo.x + (cx + 0.5) * s->cell;
            while (k < nx && xs[k] < x)
                k++;
            s->center_in[(size_t)cy * (size_t)s->gx + (size_t)cx] = (unsigned char)(k & 1);
        }
    }
    free(xs);
    return SL_OK;
}

sl_status sl_body_create(const sl_slice_stack *stack, const char *what, sl_body **out,
                         sl_error *err)
{
    *out = NULL;
    if (stack->nslices == 0)
        return sl_error_set(err, SL_EINPUT, "%s: the body has no closed contour", what);
    sl_body *b = calloc(1, sizeof *b);
    if (!b)
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    b->s = calloc(stack->nslices, sizeof *b->s);
    if (!b->s) {
        free(b);
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    }
    b->n = stack->nslices;
    b->lo = (sl_vec3){DBL_MAX, DBL_MAX, DBL_MAX};
    b->hi = (sl_vec3){-DBL_MAX, -DBL_MAX, -DBL_MAX};
    for (size_t i = 0; i < b->n; i++) {
        sl_status st = slice_build(stack, &stack->slices[i], &b->s[i]);
        if (st != SL_OK) {
            double z = stack->slices[i].z_cm;
            sl_body_free(b);
            if (st == SL_EINPUT)
                return sl_error_set(err, SL_EINPUT,
                                    "%s: the contours at z = %.2f cm are too dense to trace (more "
                                    "than %d edges in one grid cell)",
                                    what, z, MAX_CELL_EDGES);
            return sl_error_set(err, SL_ENOMEM, "out of memory building the body model");
        }
        const bslice *s = &b->s[i];
        b->lo.x = fmin(b->lo.x, s->lo.x);
        b->lo.y = fmin(b->lo.y, s->lo.y);
        b->hi.x = fmax(b->hi.x, s->hi.x);
        b->hi.y = fmax(b->hi.y, s->hi.y);
    }
    b->lo.z = b->s[0].z_lo;
    b->hi.z = b->s[b->n - 1].z_hi;
    *out = b;
    return SL_OK;
}

void sl_body_bounds(const sl_body *b, sl_vec3 *lo, sl_vec3 *hi)
{
    *lo = b->lo;
    *hi = b->hi;
}

static bool cell_of(const bslice *s, sl_vec2 q, int *cx, int *cy)
{
    double fx = (q.x - s->lo.x) / s->cell, fy = (q.y - s->lo.y) / s->cell;
    if (!(fx >= 0 && fy >= 0 && fx < s->gx && fy < s->gy))
        return false;
    *cx = (int)fx;
    *cy = (int)fy;
    return true;
}

static bool slice_inside(const bslice *s, sl_vec2 q)
{
    int cx, cy;
    if (!cell_of(s, q, &cx, &cy))
        return false;
    size_t c = (size_t)cy * (size_t)s->gx + (size_t)cx;
    sl_vec2 centre = {s->lo.x + (cx + 0.5) * s->cell, s->lo.y + (cy + 0.5) * s->cell};
    bool in = s->center_in[c];
    for (size_t k = s->cell_start[c]; k < s->cell_start[c + 1]; k++) {
        size_t i = s->cell_edges[k];
        if (sl_p2_crosses(centre, q, s->ea[i], s->eb[i], NULL))
            in = !in;
    }
    return in;
}

/* Where the stretches inside go when they are wanted one by one (for the
 * union with a bolus): the slice's parameter f maps to base + f * scale. */
typedef struct span_sink {
    sl_spans *spans;
    double base, scale;
    bool failed;
} span_sink;

static void sink_put(span_sink *k, double f0, double f1)
{
    if (!k || k->failed || !(f1 > f0))
        return;
    if (sl_spans_add(k->spans, k->base + f0 * k->scale, k->base + f1 * k->scale) != SL_OK)
        k->failed = true;
}

/* In-polygon part of the 2-D segment q0 -> q1 (parameter 0..1): its length
 * as a fraction of the segment, and the first parameter where it is inside.
 * With a sink, each inside stretch is also handed to it. */
static double slice_segment(const bslice *s, sl_vec2 q0, sl_vec2 q1, double *first_in,
                            span_sink *sink)
{
    *first_in = NAN;
    double dx = q1.x - q0.x, dy = q1.y - q0.y;
    /* clip to the slice's grid box (Liang-Barsky) */
    double sa = 0, sb = 1;
    const double p[4] = {-dx, dx, -dy, dy};
    const double qq[4] = {q0.x - s->lo.x, s->hi.x - q0.x, q0.y - s->lo.y, s->hi.y - q0.y};
    for (int i = 0; i < 4; i++) {
        if (p[i] == 0) {
            if (qq[i] < 0)
                return 0;
        } else {
            double r = qq[i] / p[i];
            if (p[i] < 0)
                sa = dmax(sa, r);
            else
                sb = dmin(sb, r);
        }
    }
    if (!(sa < sb))
        return 0;
    /* the common case of a slab a few millimetres thick: the piece lies in
     * one cell that no edge crosses, so it is all in or all out */
    {
        int c0x = cell_index((q0.x + sa * dx - s->lo.x) / s->cell, s->gx);
        int c0y = cell_index((q0.y + sa * dy - s->lo.y) / s->cell, s->gy);
        int c1x = cell_index((q0.x + sb * dx - s->lo.x) / s->cell, s->gx);
        int c1y = cell_index((q0.y + sb * dy - s->lo.y) / s->cell, s->gy);
        size_t c = (size_t)c0y * (size_t)s->gx + (size_t)c0x;
        if (c0x == c1x && c0y == c1y && s->cell_start[c] == s->cell_start[c + 1]) {
            if (!s->center_in[c])
                return 0;
            *first_in = sa;
            sink_put(sink, sa, sb);
            return sb - sa;
        }
    }
    if (fabs(dx) + fabs(dy) < 1e-12) {
        /* the ray runs along z through this slab: one parity throughout */
        if (slice_inside(s, q0)) {
            *first_in = 0;
            sink_put(sink, 0, 1);
            return 1;
        }
        return 0;
    }
    sl_vec2 start = {q0.x + sa * dx, q0.y + sa * dy};
    /* a clipped start lies on the margin, outside every edge */
    bool in = sa > 0 ? false : slice_inside(s, start);
    double total = 0, last = sa;
    if (in)
        *first_in = sa;

    int cx = cell_index((start.x - s->lo.x) / s->cell, s->gx);
    int cy = cell_index((start.y - s->lo.y) / s->cell, s->gy);
    int stepx = dx > 0 ? 1 : dx < 0 ? -1 : 0;
    int stepy = dy > 0 ? 1 : dy < 0 ? -1 : 0;
    double tmx = stepx ? ((s->lo.x + (cx + (stepx > 0)) * s->cell) - q0.x) / dx : INFINITY;
    double tmy = stepy ? ((s->lo.y + (cy + (stepy > 0)) * s->cell) - q0.y) / dy : INFINITY;
    double tdx = stepx ? s->cell / fabs(dx) : INFINITY;
    double tdy = stepy ? s->cell / fabs(dy) : INFINITY;
    double enter = sa;
    double local[LOCAL_EDGES];
    double *buf = local;
    if (s->max_cell > LOCAL_EDGES) {
        buf = malloc(s->max_cell * sizeof *buf);
        if (!buf)
            return NAN; /* out of memory: the caller's depth is NAN, never a guess */
    }
    for (;;) {
        double exit = dmin(dmin(tmx, tmy), sb);
        size_t c = (size_t)cy * (size_t)s->gx + (size_t)cx;
        size_t k0 = s->cell_start[c], k1 = s->cell_start[c + 1];
        size_t nloc = 0;
        for (size_t k = k0; k < k1; k++) {
            size_t i = s->cell_edges[k];
            double t;
            if (sl_p2_crosses(q0, q1, s->ea[i], s->eb[i], &t) && t >= enter && t < exit)
                buf[nloc++] = t;
        }
        if (nloc > 1)
            qsort(buf, nloc, sizeof *buf, cmp_double);
        for (size_t j = 0; j < nloc; j++) {
            if (in) {
                total += buf[j] - last;
                sink_put(sink, last, buf[j]);
            } else if (isnan(*first_in)) {
                *first_in = buf[j];
            }
            in = !in;
            last = buf[j];
        }
        if (exit >= sb)
            break;
        enter = exit;
        if (tmx < tmy) {
            cx += stepx;
            tmx += tdx;
        } else {
            cy += stepy;
            tmy += tdy;
        }
        if (cx < 0 || cy < 0 || cx >= s->gx || cy >= s->gy)
            break;
    }
    if (buf != local)
        free(buf);
    if (in) {
        total += sb - last;
        sink_put(sink, last, sb);
    }
    return total;
}

static size_t slab_at(const sl_body *b, double z)
{
    size_t lo = 0, hi = b->n; /* first slab with z_hi > z */
    while (lo < hi) {
        size_t mid = (lo + hi) / 2;
        if (b->s[mid].z_hi <= z)
            lo = mid + 1;
        else
            hi = mid;
    }
    return lo;
}

/* The path of a -> c inside the body; with spans, each inside stretch is
 * appended too (segment parameters). */
static double body_path(const sl_body *b, sl_vec3 a, sl_vec3 c, double *entry_t, sl_spans *spans)
{
    if (entry_t)
        *entry_t = NAN;
    double d[3] = {c.x - a.x, c.y - a.y, c.z - a.z};
    double len = sqrt(d[0] * d[0] + d[1] * d[1] + d[2] * d[2]);
    if (len == 0)
        return 0;
    /* clip to the body's box */
    double t0 = 0, t1 = 1;
    const double o[3] = {a.x, a.y, a.z};
    const double lo[3] = {b->lo.x, b->lo.y, b->lo.z}, hi[3] = {b->hi.x, b->hi.y, b->hi.z};
    for (int k = 0; k < 3; k++) {
        if (d[k] == 0) {
            if (o[k] < lo[k] || o[k] > hi[k])
                return 0;
            continue;
        }
        double ta = (lo[k] - o[k]) / d[k], tb = (hi[k] - o[k]) / d[k];
        if (ta > tb) {
            double t = ta;
            ta = tb;
            tb = t;
        }
        t0 = dmax(t0, ta);
        t1 = dmin(t1, tb);
    }
    if (!(t0 < t1))
        return 0;
    double total = 0;
    if (d[2] == 0) {
        size_t i = slab_at(b, a.z);
        if (i >= b->n || a.z < b->s[i].z_lo)
            return 0;
        sl_vec2 q0 = {a.x + t0 * d[0], a.y + t0 * d[1]}, q1 = {a.x + t1 * d[0], a.y + t1 * d[1]};
        double first;
        span_sink sink = {spans, t0, t1 - t0, false};
        double f = slice_segment(&b->s[i], q0, q1, &first, spans ? &sink : NULL);
        if (entry_t && !isnan(first))
            *entry_t = t0 + first * (t1 - t0);
        return sink.failed ? NAN : f * (t1 - t0) * len;
    }
    /* walk the slabs in the order the segment meets them */
    double za = a.z + t0 * d[2], zb = a.z + t1 * d[2];
    bool up = d[2] > 0;
    size_t i = slab_at(b, up ? za : zb);
    size_t iend = slab_at(b, up ? zb : za);
    if (iend >= b->n)
        iend = b->n - 1;
    if (i >= b->n)
        return 0;
    for (size_t step = 0; step <= iend - i; step++) {
        size_t k = up ? i + step : iend - step;
        const bslice *s = &b->s[k];
        double ta = (s->z_lo - a.z) / d[2], tb = (s->z_hi - a.z) / d[2];
        if (ta > tb) {
            double t = ta;
            ta = tb;
            tb = t;
        }
        ta = dmax(ta, t0);
        tb = dmin(tb, t1);
        if (!(ta < tb))
            continue;
        sl_vec2 q0 = {a.x + ta * d[0], a.y + ta * d[1]}, q1 = {a.x + tb * d[0], a.y + tb * d[1]};
        double first;
        span_sink sink = {spans, ta, tb - ta, false};
        double f = slice_segment(s, q0, q1, &first, spans ? &sink : NULL);
        if (sink.failed)
            return NAN;
        if (entry_t && isnan(*entry_t) && !isnan(first))
            *entry_t = ta + first * (tb - ta);
        total += f * (tb - ta) * len;
    }
    return total;
}

double sl_body_path(const sl_body *b, sl_vec3 a, sl_vec3 c, double *entry_t)
{
    return body_path(b, a, c, entry_t, NULL);
}

sl_status sl_spans_add(sl_spans *s, double t0, double t1)
{
    if (s->n + 2 > s->cap) {
        size_t cap = s->cap ? 2 * s->cap : 32;
        double *t = s->heap ? realloc(s->t, cap * sizeof *t) : malloc(cap * sizeof *t);
        if (!t)
            return SL_ENOMEM;
        if (!s->heap && s->n)
            memcpy(t, s->t, s->n * sizeof *t);
        s->t = t;
        s->cap = cap;
        s->heap = true;
    }
    s->t[s->n++] = t0;
    s->t[s->n++] = t1;
    return SL_OK;
}

void sl_spans_free(sl_spans *s)
{
    if (s->heap)
        free(s->t);
    s->t = NULL;
    s->n = s->cap = 0;
    s->heap = false;
}

sl_status sl_body_spans(const sl_body *b, sl_vec3 a, sl_vec3 c, sl_spans *spans)
{
    size_t n0 = spans->n;
    double len = body_path(b, a, c, NULL, spans);
    if (isnan(len)) {
        spans->n = n0;
        return SL_ENOMEM;
    }
    return SL_OK;
}

double sl_bodies_path(const sl_body *const *bodies, size_t nbodies, sl_vec3 a, sl_vec3 c,
                      double *entry_t)
{
    if (nbodies == 1)
        return sl_body_path(bodies[0], a, c, entry_t);
    if (entry_t)
        *entry_t = NAN;
    double local[64];
    sl_spans sp = {local, 0, sizeof local / sizeof *local, false};
    for (size_t i = 0; i < nbodies; i++) {
        if (sl_body_spans(bodies[i], a, c, &sp) != SL_OK) {
            sl_spans_free(&sp);
            return NAN;
        }
    }
    /* each body's stretches come in order; together they are sorted by
     * start (few: insertion sort) and overlaps counted once */
    size_t np = sp.n / 2;
    for (size_t i = 1; i < np; i++) {
        double s0 = sp.t[2 * i], s1 = sp.t[2 * i + 1];
        size_t j = i;
        while (j > 0 && sp.t[2 * (j - 1)] > s0) {
            sp.t[2 * j] = sp.t[2 * (j - 1)];
            sp.t[2 * j + 1] = sp.t[2 * (j - 1) + 1];
            j--;
        }
        sp.t[2 * j] = s0;
        sp.t[2 * j + 1] = s1;
    }
    double total = 0, cur0 = 0, cur1 = -1;
    for (size_t i = 0; i < np; i++) {
        double s0 = sp.t[2 * i], s1 = sp.t[2 * i + 1];
        if (s0 > cur1) {
            if (cur1 > cur0)
                total += cur1 - cur0;
            cur0 = s0;
            cur1 = s1;
        } else if (s1 > cur1) {
            cur1 = s1;
        }
    }
    if (cur1 > cur0)
        total += cur1 - cur0;
    if (entry_t && np)
        *entry_t = sp.t[0];
    sl_spans_free(&sp);
    double dx = c.x - a.x, dy = c.y - a.y, dz = c.z - a.z;
    return total * sqrt(dx * dx + dy * dy + dz * dz);
}

bool sl_body_contains(const sl_body *b, sl_vec3 p)
{
    size_t i = slab_at(b, p.z);
    if (i >= b->n || p.z < b->s[i].z_lo)
        return false;
    return slice_inside(&b->s[i], (sl_vec2){p.x, p.y});
}
