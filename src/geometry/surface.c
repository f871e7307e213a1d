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
#include "strayline/parallel.h"
#include "strayline/poly2d.h"

#include <float.h>
#include <math.h>
#include <stdint.h>
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
    size_t ne;             /* edges */
    /* the loops' points, each loop followed by its first point again, so
     * that the edge at position i runs from ep[i] to ep[i + 1]; an edge is
     * named by that position. Loop k takes positions loop_start[k] to
     * loop_start[k + 1] - 1 (its last one is the repeated point). One copy
     * of the points instead of a start and an end array: 8 MB less on a
     * dense body of 0.5 million points. */
    sl_vec2 *ep;
    size_t nloops;
    size_t *loop_start;
    uint32_t *cell_start;  /* gx * gy + 1 offsets into cell_edges */
    uint32_t *cell_edges;
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

/* Crossings along one piece are few: insertion sort beats a qsort call. */
static void sort_small(double *v, size_t n)
{
    if (n > 16) {
        qsort(v, n, sizeof *v, cmp_double);
        return;
    }
    for (size_t k = 1; k < n; k++) {
        double x = v[k];
        size_t m = k;
        while (m > 0 && v[m - 1] > x) {
            v[m] = v[m - 1];
            m--;
        }
        v[m] = x;
    }
}

static void slice_free(bslice *s)
{
    free(s->ep);
    free(s->loop_start);
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
    s->nloops = sl->count;
    /* edges are named by 32-bit positions (the cell and fan lists): four
     * billion points would not fit in memory anyway */
    if (ne + sl->count > UINT32_MAX)
        return SL_ENOMEM;
    s->ep = malloc((ne + sl->count) * sizeof *s->ep);
    s->loop_start = malloc((sl->count + 1) * sizeof *s->loop_start);
    if (!s->ep || !s->loop_start)
        return SL_ENOMEM;
    sl_vec2 lo = {DBL_MAX, DBL_MAX}, hi = {-DBL_MAX, -DBL_MAX};
    size_t e = 0;
    for (size_t k = 0; k < sl->count; k++) {
        const sl_vec2 *p = st->loops[sl->first + k];
        size_t n = st->loop_n[sl->first + k];
        s->loop_start[k] = e;
        /* no fmin/fmax calls: contour points are finite, and a zero's sign
         * cannot move the margin */
        for (size_t i = 0; i < n; i++) {
            s->ep[e++] = p[i];
            lo.x = dmin(lo.x, p[i].x);
            lo.y = dmin(lo.y, p[i].y);
            hi.x = dmax(hi.x, p[i].x);
            hi.y = dmax(hi.y, p[i].y);
        }
        if (n)
            s->ep[e++] = p[0];
    }
    s->loop_start[sl->count] = e;
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
                /* at most 64 x 64 cells of MAX_CELL_EDGES: 32 bits hold it */
                s->cell_start[c] = (uint32_t)total;
                total += k;
            }
            s->cell_start[ncell] = (uint32_t)total;
            s->cell_edges = malloc((total ? total : 1) * sizeof *s->cell_edges);
            if (!s->cell_edges)
                return SL_ENOMEM;
        }
        uint32_t *fill = NULL;
        if (pass == 1) {
            fill = malloc(ncell * sizeof *fill);
            if (!fill)
                return SL_ENOMEM;
            memcpy(fill, s->cell_start, ncell * sizeof *fill);
        }
        for (size_t k = 0; k < s->nloops; k++)
            for (size_t i = s->loop_start[k]; i + 1 < s->loop_start[k + 1]; i++) {
                sl_vec2 a = s->ep[i], b = s->ep[i + 1];
                int x0 = cell_index((dmin(a.x, b.x) - eps - lo.x) / s->cell, s->gx);
                int x1 = cell_index((dmax(a.x, b.x) + eps - lo.x) / s->cell, s->gx);
                int y0 = cell_index((dmin(a.y, b.y) - eps - lo.y) / s->cell, s->gy);
                int y1 = cell_index((dmax(a.y, b.y) + eps - lo.y) / s->cell, s->gy);
                for (int cy = y0; cy <= y1; cy++)
                    for (int cx = x0; cx <= x1; cx++) {
                        size_t c = (size_t)cy * (size_t)s->gx + (size_t)cx;
                        if (pass == 0)
                            s->cell_start[c]++;
                        else
                            s->cell_edges[fill[c]++] = (uint32_t)i;
                    }
            }
        free(fill);
    }

    /* parity of every cell centre: one horizontal scan a row. Each edge
     * goes only to the rows whose centre line it crosses (a few), not every
     * row to every edge: a dense body contour made this scan the larger part
     * of building the body. The test and the crossing are those of a scan
     * over all edges, so every row gets the same crossings. */
    double rowy[GRID_MAX];
    size_t rowstart[GRID_MAX + 2] = {0};
    for (int cy = 0; cy < s->gy; cy++)
        rowy[cy] = lo.y + (cy + 0.5) * s->cell;
    size_t nxs = 0;
    for (int pass = 0; pass < 2; pass++) {
        double *xs = NULL;
        if (pass == 1) {
            for (int cy = 0; cy < s->gy; cy++)
                rowstart[cy + 1] += rowstart[cy];
            nxs = rowstart[s->gy];
            xs = malloc((nxs ? nxs : 1) * sizeof *xs);
            if (!xs)
                return SL_ENOMEM;
        }
        for (size_t k = 0; k < s->nloops; k++)
            for (size_t i = s->loop_start[k]; i + 1 < s->loop_start[k + 1]; i++) {
                sl_vec2 a = s->ep[i], b = s->ep[i + 1];
                /* the rows near the edge's y extent; the exact test decides */
                double f0 = (dmin(a.y, b.y) - lo.y) / s->cell - 0.5;
                double f1 = (dmax(a.y, b.y) - lo.y) / s->cell - 0.5;
                int r0 = f0 > 1 ? (int)f0 - 1 : 0;
                int r1 = f1 < s->gy ? (int)f1 + 1 : s->gy - 1;
                if (r1 > s->gy - 1)
                    r1 = s->gy - 1;
                for (int cy = r0; cy <= r1; cy++) {
                    double y = rowy[cy];
                    if ((a.y > y) != (b.y > y)) {
                        if (pass == 0)
                            rowstart[cy + 1]++;
                        else
                            xs[rowstart[cy]++] = a.x + (y - a.y) * (b.x - a.x) / (b.y - a.y);
                    }
                }
            }
        if (pass == 1) {
            /* rowstart[cy] now ends row cy: rows run from the previous end */
            size_t from = 0;
            for (int cy = 0; cy < s->gy; cy++) {
                size_t to = rowstart[cy], nx = to - from;
                double *row = xs + from;
                qsort(row, nx, sizeof *row, cmp_double);
                size_t k = 0;
                for (int cx = 0; cx < s->gx; cx++) {
                    double x = lo.x + (cx + 0.5) * s->cell;
                    while (k < nx && row[k] < x)
                        k++;
                    s->center_in[(size_t)cy * (size_t)s->gx + (size_t)cx] = (unsigned char)(k & 1);
                }
                from = to;
            }
            free(xs);
        }
    }
    return SL_OK;
}

typedef struct build_job {
    const sl_slice_stack *stack;
    bslice *s;
    sl_status *st;
} build_job;

static void build_task(size_t i, void *ctx)
{
    build_job *j = ctx;
    j->st[i] = slice_build(j->stack, &j->stack->slices[i], &j->s[i]);
}

sl_status sl_body_create(const sl_slice_stack *stack, const char *what, sl_body **out,
                         sl_error *err)
{
    return sl_body_create_threads(stack, what, 1, out, err);
}

sl_status sl_body_create_threads(const sl_slice_stack *stack, const char *what, int threads,
                                 sl_body **out, sl_error *err)
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
    /* slices are independent: built on the threads asked for, then checked
     * in order, so that the first bad slice is the one named */
    sl_status *sts = calloc(b->n, sizeof *sts);
    if (!sts) {
        sl_body_free(b);
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    }
    build_job job = {stack, b->s, sts};
    sl_parallel_for(b->n, threads == 1 ? 1 : sl_parallel_threads(threads), build_task, &job);
    for (size_t i = 0; i < b->n; i++) {
        sl_status st = sts[i];
        if (st != SL_OK) {
            free(sts);
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
    free(sts);
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
        if (sl_p2_crosses(centre, q, s->ep[i], s->ep[i + 1], NULL))
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
            if (sl_p2_crosses(q0, q1, s->ep[i], s->ep[i + 1], &t) && t >= enter && t < exit)
                buf[nloc++] = t;
        }
        if (nloc > 1)
            sort_small(buf, nloc);
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

/* The slabs a segment z(t) = az + t dz, t in [t0, t1] (dz != 0), passes
 * through, in the order it meets them, each with the stretch [ta, tb] of t
 * inside it: the exact tracer and the fans walk them alike. */
typedef struct slab_walk {
    const sl_body *b;
    double az, dz, t0, t1;
    size_t i, iend, step;
    bool up;
} slab_walk;

static bool slab_walk_start(slab_walk *w, const sl_body *b, double az, double dz, double t0,
                            double t1)
{
    double za = az + t0 * dz, zb = az + t1 * dz;
    *w = (slab_walk){b, az, dz, t0, t1, 0, 0, 0, dz > 0};
    w->i = slab_at(b, w->up ? za : zb);
    w->iend = slab_at(b, w->up ? zb : za);
    if (w->iend >= b->n)
        w->iend = b->n - 1;
    return w->i < b->n;
}

static bool slab_walk_next(slab_walk *w, size_t *k, double *ta, double *tb)
{
    while (w->step <= w->iend - w->i) {
        size_t kk = w->up ? w->i + w->step : w->iend - w->step;
        w->step++;
        const bslice *s = &w->b->s[kk];
        double a0 = (s->z_lo - w->az) / w->dz, a1 = (s->z_hi - w->az) / w->dz;
        if (a0 > a1) {
            double t = a0;
            a0 = a1;
            a1 = t;
        }
        a0 = dmax(a0, w->t0);
        a1 = dmin(a1, w->t1);
        if (a0 < a1) {
            *k = kk;
            *ta = a0;
            *tb = a1;
            return true;
        }
    }
    return false;
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
    slab_walk w;
    if (!slab_walk_start(&w, b, a.z, d[2], t0, t1))
        return 0;
    size_t k;
    double ta, tb;
    while (slab_walk_next(&w, &k, &ta, &tb)) {
        const bslice *s = &b->s[k];
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

/* Total length (in segment parameter) of the union of the stretches, and
 * where the first begins (NAN when none). Sorts them in place. */
static double spans_union(sl_spans *spp, double *first)
{
    sl_spans sp = *spp;
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
    *first = np ? sp.t[0] : NAN;
    return total;
}

/* The path (cm) along a -> c through the union of the solids whose inside
 * stretches sp holds (segment parameters); the first entry into entry_t.
 * Frees sp. */
static double spans_path(sl_spans *sp, sl_vec3 a, sl_vec3 c, double *entry_t)
{
    double first;
    double total = spans_union(sp, &first);
    if (entry_t)
        *entry_t = first;
    sl_spans_free(sp);
    double dx = c.x - a.x, dy = c.y - a.y, dz = c.z - a.z;
    return total * sqrt(dx * dx + dy * dy + dz * dz);
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
    return spans_path(&sp, a, c, entry_t);
}

bool sl_body_contains(const sl_body *b, sl_vec3 p)
{
    size_t i = slab_at(b, p.z);
    if (i >= b->n || p.z < b->s[i].z_lo)
        return false;
    return slice_inside(&b->s[i], (sl_vec2){p.x, p.y});
}

/* ------------------------------------------------------------- fans -- */

/* The body seen from one source (one beam): every ray from the source
 * projects onto the axial plane as a ray from the source's projection S2,
 * the same point for every slab. So each slab's edges are indexed once per
 * beam by the direction they subtend from S2 (bins uniform in tan of the
 * angle from a reference direction toward the body), and along one bin the
 * edges' extents in X (distance along the reference direction, which grows
 * along every ray of the bin) merge into clusters. Between two clusters no
 * edge touches the bin's wedge, so the parity there is the same for every
 * ray of the bin: it is found once, on the bin's centre ray. A query then
 * walks the slabs as sl_body_path does, and a ray's piece in a slab that
 * lies between clusters is all in or all out at the cost of a comparison;
 * only a piece that overlaps a cluster (where the ray crosses the skin)
 * tests the few edges of its bin, with the same crossing rule as the
 * grid walk. Exact, like the grid walk: no interpolation. */

#define FAN_TAN_MAX 4.0 /* the body must lie within about 76 degrees of the reference */

/* One slab's index lives in one block (bin_start is its base, the rest
 * follow it), sized exactly once the slab is built: one allocation a slab
 * instead of nine, and no pages touched for room given back later. */
typedef struct fan_slice {
    uint32_t *bin_start; /* nb + 1; the base of the block */
    uint32_t *edges;
    uint32_t *cl_start;  /* nb + 1 */
    float *cl_lo, *cl_hi;  /* rounded outward: a piece is judged clear of a
                              cluster only when it is */
    unsigned char *cl_par; /* parity just beyond each cluster */
} fan_slice;

struct sl_body_fan {
    const sl_body *body;
    sl_vec3 src;
    sl_vec2 s2, dir, nrm;
    double tau0, dtau;
    int nb;
    double xlo, xfar;
    double *bin_xlo; /* per bin: the least X of any slab's edge in it (no body before) */
    fan_slice *fs;
};

void sl_body_fan_free(sl_body_fan *f)
{
    if (!f)
        return;
    for (size_t k = 0; f->fs && k < f->body->n; k++) {
        free(f->fs[k].bin_start);
    }
    free(f->fs);
    free(f->bin_xlo);
    free(f);
}

static inline void fan_xy(const sl_body_fan *f, sl_vec2 q, double *x, double *y)
{
    double dx = q.x - f->s2.x, dy = q.y - f->s2.y;
    *x = dx * f->dir.x + dy * f->dir.y;
    *y = dx * f->nrm.x + dy * f->nrm.y;
}

typedef struct xr {
    double lo, hi;
    uint32_t e;
} xr;

static int cmp_xr(const void *a, const void *b)
{
    double x = ((const xr *)a)->lo, y = ((const xr *)b)->lo;
    return x < y ? -1 : x > y;
}

/* Scratch space of fan building, reused slab after slab. */
typedef struct fan_scratch {
    double *x, *t;             /* per point (the slice's positions) */
    int *j0, *j1;              /* per edge: its first and last bin */
    size_t pcap;               /* positions the four arrays above hold */
    xr *r;                     /* one bin's edges */
    size_t rcap;
    uint32_t *fill;            /* nb */
    uint32_t *bin_start, *cl_start; /* nb + 1 each */
    uint32_t *edges;           /* the slab's index, built here, then copied */
    size_t edcap;
    float *cl_lo, *cl_hi;
    unsigned char *cl_par;
    size_t clcap;
} fan_scratch;

static sl_status grow(void **p, size_t *cap, size_t n, size_t size)
{
    if (n <= *cap)
        return SL_OK;
    void *q = realloc(*p, n * size);
    if (!q)
        return SL_ENOMEM;
    *p = q;
    *cap = n;
    return SL_OK;
}

static sl_status fan_slice_build(sl_body_fan *f, const bslice *s, fan_slice *fs, fan_scratch *w)
{
    int nb = f->nb;
    const double eps = 1e-9;
    /* positions: every point, and the repeated first point that ends each
     * loop; an edge i runs from position i to i + 1 */
    size_t np = s->loop_start[s->nloops], pcap = w->pcap;
    if (np > pcap) {
        /* the per-position scratch arrays grow together */
        struct {
            void **p;
            size_t size;
        } a[] = {{(void **)&w->x, sizeof(double)},
                 {(void **)&w->t, sizeof(double)},
                 {(void **)&w->j0, sizeof(int)},
                 {(void **)&w->j1, sizeof(int)}};
        for (size_t k = 0; k < sizeof a / sizeof *a; k++) {
            size_t c = pcap;
            if (grow(a[k].p, &c, np, a[k].size) != SL_OK)
                return SL_ENOMEM;
        }
        w->pcap = np;
    }
    uint32_t *bin_start = w->bin_start, *cl_start = w->cl_start;
    memset(bin_start, 0, ((size_t)nb + 1) * sizeof *bin_start);
    /* each point once: an edge's two ends are its own and the next one's */
    for (size_t i = 0; i < np; i++) {
        double y;
        fan_xy(f, s->ep[i], &w->x[i], &y);
        w->t[i] = y / w->x[i];
    }
    const double *xv = w->x, *tv = w->t;
    for (size_t k = 0; k < s->nloops; k++)
        for (size_t i = s->loop_start[k]; i + 1 < s->loop_start[k + 1]; i++) {
            int j0 = cell_index((dmin(tv[i], tv[i + 1]) - eps - f->tau0) / f->dtau, nb);
            int j1 = cell_index((dmax(tv[i], tv[i + 1]) + eps - f->tau0) / f->dtau, nb);
            w->j0[i] = j0;
            w->j1[i] = j1;
            for (int j = j0; j <= j1; j++)
                bin_start[j]++;
        }
    size_t total = 0;
    for (int j = 0; j < nb; j++) {
        size_t k = bin_start[j];
        bin_start[j] = (uint32_t)total;
        w->fill[j] = (uint32_t)total;
        total += k;
    }
    if (total > UINT32_MAX)
        return SL_ENOMEM;
    bin_start[nb] = (uint32_t)total;
    /* at most one cluster an entry */
    if (grow((void **)&w->edges, &w->edcap, total ? total : 1, sizeof *w->edges) != SL_OK)
        return SL_ENOMEM;
    size_t need = total ? total : 1;
    if (need > w->clcap) {
        size_t c = w->clcap;
        if (grow((void **)&w->cl_lo, &c, need, sizeof *w->cl_lo) != SL_OK)
            return SL_ENOMEM;
        c = w->clcap;
        if (grow((void **)&w->cl_hi, &c, need, sizeof *w->cl_hi) != SL_OK)
            return SL_ENOMEM;
        c = w->clcap;
        if (grow((void **)&w->cl_par, &c, need, sizeof *w->cl_par) != SL_OK)
            return SL_ENOMEM;
        w->clcap = need;
    }
    uint32_t *edges = w->edges;
    float *cl_lo = w->cl_lo, *cl_hi = w->cl_hi;
    unsigned char *cl_par = w->cl_par;
    for (size_t k = 0; k < s->nloops; k++)
        for (size_t i = s->loop_start[k]; i + 1 < s->loop_start[k + 1]; i++)
            for (int j = w->j0[i]; j <= w->j1[i]; j++)
                edges[w->fill[j]++] = (uint32_t)i;

    size_t ncl = 0;
    for (int j = 0; j < nb; j++) {
        cl_start[j] = (uint32_t)ncl;
        uint32_t e0 = bin_start[j], e1 = bin_start[j + 1];
        size_t n = e1 - e0;
        if (n == 0)
            continue;
        if (grow((void **)&w->r, &w->rcap, n, sizeof *w->r) != SL_OK)
            return SL_ENOMEM;
        xr *r = w->r;
        for (size_t k = 0; k < n; k++) {
            uint32_t e = edges[e0 + k];
            r[k] = (xr){dmin(xv[e], xv[e + 1]) - eps, dmax(xv[e], xv[e + 1]) + eps, e};
        }
        if (n > 24) {
            qsort(r, n, sizeof *r, cmp_xr);
        } else {
            for (size_t k = 1; k < n; k++) {
                xr v = r[k];
                size_t m = k;
                while (m > 0 && r[m - 1].lo > v.lo) {
                    r[m] = r[m - 1];
                    m--;
                }
                r[m] = v;
            }
        }
        /* the bin's centre ray, for the parity beyond each cluster */
        double tc = f->tau0 + (j + 0.5) * f->dtau;
        unsigned char par = 0;
        size_t k = 0;
        while (k < n) {
            double lo = r[k].lo, hi = r[k].hi;
            size_t k1 = k;
            while (k1 < n && r[k1].lo <= hi) {
                hi = dmax(hi, r[k1].hi);
                /* the edge crosses the centre ray where its ends lie on
                 * either side of it (half-open, so a vertex counts once):
                 * all that the parity in the next gap needs */
                uint32_t e = r[k1].e;
                if ((tv[e] > tc) != (tv[e + 1] > tc))
                    par ^= 1;
                k1++;
            }
            float flo = (float)lo, fhi = (float)hi;
            cl_lo[ncl] = (double)flo > lo ? nextafterf(flo, -INFINITY) : flo;
            cl_hi[ncl] = (double)fhi < hi ? nextafterf(fhi, INFINITY) : fhi;
            cl_par[ncl] = par;
            ncl++;
            k = k1;
        }
    }
    cl_start[nb] = (uint32_t)ncl;
    /* the slab's index in one block of its exact size */
    size_t n32 = 2 * ((size_t)nb + 1) + total + 2 * ncl;
    uint32_t *block = malloc(n32 * sizeof(uint32_t) + (ncl ? ncl : 1));
    if (!block)
        return SL_ENOMEM;
    fs->bin_start = block;
    fs->cl_start = fs->bin_start + nb + 1;
    fs->edges = fs->cl_start + nb + 1;
    fs->cl_lo = (float *)(fs->edges + total);
    fs->cl_hi = fs->cl_lo + ncl;
    fs->cl_par = (unsigned char *)(fs->cl_hi + ncl);
    memcpy(fs->bin_start, bin_start, ((size_t)nb + 1) * sizeof *bin_start);
    memcpy(fs->cl_start, cl_start, ((size_t)nb + 1) * sizeof *cl_start);
    memcpy(fs->edges, edges, total * sizeof *edges);
    memcpy(fs->cl_lo, cl_lo, ncl * sizeof *cl_lo);
    memcpy(fs->cl_hi, cl_hi, ncl * sizeof *cl_hi);
    memcpy(fs->cl_par, cl_par, ncl);
    return SL_OK;
}

/* Slabs are indexed independently: a task a run of slabs, each task with
 * its own scratch space. */
#define FAN_TASK_SLABS 16

typedef struct fan_job {
    sl_body_fan *f;
    sl_status *st;
} fan_job;

static void fan_task(size_t t, void *ctx)
{
    fan_job *j = ctx;
    const sl_body *b = j->f->body;
    fan_scratch w = {0};
    w.fill = malloc((size_t)j->f->nb * sizeof *w.fill);
    w.bin_start = malloc(((size_t)j->f->nb + 1) * sizeof *w.bin_start);
    w.cl_start = malloc(((size_t)j->f->nb + 1) * sizeof *w.cl_start);
    sl_status st = w.fill && w.bin_start && w.cl_start ? SL_OK : SL_ENOMEM;
    size_t end = (t + 1) * FAN_TASK_SLABS < b->n ? (t + 1) * FAN_TASK_SLABS : b->n;
    for (size_t k = t * FAN_TASK_SLABS; k < end && st == SL_OK; k++)
        st = fan_slice_build(j->f, &b->s[k], &j->f->fs[k], &w);
    free(w.x);
    free(w.t);
    free(w.j0);
    free(w.j1);
    free(w.r);
    free(w.fill);
    free(w.bin_start);
    free(w.cl_start);
    free(w.edges);
    free(w.cl_lo);
    free(w.cl_hi);
    free(w.cl_par);
    j->st[t] = st;
}

sl_status sl_body_fan_create(const sl_body *b, sl_vec3 source, int threads, sl_body_fan **out,
                             sl_error *err)
{
    *out = NULL;
    sl_vec2 s2 = {source.x, source.y};
    double cx = 0.5 * (b->lo.x + b->hi.x) - s2.x, cy = 0.5 * (b->lo.y + b->hi.y) - s2.y;
    double cn = sqrt(cx * cx + cy * cy);
    if (!(cn > 0))
        return SL_OK; /* a source above the body's middle (a beam along z): no fan */
    sl_body_fan *f = calloc(1, sizeof *f);
    if (!f)
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    f->body = b;
    f->src = source;
    f->s2 = s2;
    f->dir = (sl_vec2){cx / cn, cy / cn};
    f->nrm = (sl_vec2){-f->dir.y, f->dir.x};
    /* every slab lies in the body's box: its corners bound X and tan */
    double tlo = INFINITY, thi = -INFINITY, xlo = INFINITY, xhi = -INFINITY;
    const sl_vec2 corners[4] = {{b->lo.x, b->lo.y}, {b->hi.x, b->lo.y}, {b->hi.x, b->hi.y},
                                {b->lo.x, b->hi.y}};
    for (int k = 0; k < 4; k++) {
        double x, y;
        fan_xy(f, corners[k], &x, &y);
        if (!(x > 0) || fabs(y / x) > FAN_TAN_MAX) {
            free(f);
            return SL_OK; /* the source is too close to the body, or beside it: no fan */
        }
        tlo = dmin(tlo, y / x);
        thi = dmax(thi, y / x);
        xlo = dmin(xlo, x);
        xhi = dmax(xhi, x);
    }
    size_t maxe = 0;
    for (size_t k = 0; k < b->n; k++)
        maxe = b->s[k].ne > maxe ? b->s[k].ne : maxe;
    /* about one bin an edge: few edges a bin, few bins an edge */
    f->nb = (int)(maxe / 2 < 64 ? 64 : maxe / 2 > 16384 ? 16384 : maxe / 2);
    double pad = 1e-6 * (thi - tlo) + 1e-12;
    f->tau0 = tlo - pad;
    f->dtau = (thi - tlo + 2 * pad) / f->nb;
    f->xlo = xlo;
    f->xfar = xhi + 1;
    f->fs = calloc(b->n, sizeof *f->fs);
    if (!f->fs) {
        free(f);
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    }
    size_t ntasks = (b->n + FAN_TASK_SLABS - 1) / FAN_TASK_SLABS;
    sl_status *tst = calloc(ntasks, sizeof *tst);
    sl_status st = tst ? SL_OK : SL_ENOMEM;
    if (tst) {
        fan_job job = {f, tst};
        sl_parallel_for(ntasks, sl_parallel_threads(threads), fan_task, &job);
        for (size_t t = 0; t < ntasks; t++)
            if (tst[t] != SL_OK)
                st = tst[t];
        free(tst);
    }
    if (st == SL_OK && !(f->bin_xlo = malloc((size_t)f->nb * sizeof *f->bin_xlo)))
        st = SL_ENOMEM;
    if (st != SL_OK) {
        sl_body_fan_free(f);
        return sl_error_set(err, SL_ENOMEM, "out of memory indexing the body for a beam");
    }
    /* a ray's pieces before the first edge of its bin in any slab are
     * outside: the walk starts there */
    for (int j = 0; j < f->nb; j++)
        f->bin_xlo[j] = INFINITY;
    for (size_t k = 0; k < b->n; k++)
        for (int j = 0; j < f->nb; j++)
            if (f->fs[k].cl_start[j] < f->fs[k].cl_start[j + 1])
                f->bin_xlo[j] = dmin(f->bin_xlo[j], f->fs[k].cl_lo[f->fs[k].cl_start[j]]);
    *out = f;
    return SL_OK;
}

/* The in-body part (as a fraction of t) of the piece [ta, tb] of the ray
 * S -> p in slab k; xp is p's X, far the end of the bin's crossing segment
 * (X = xfar) on the ray's own direction. */
static double fan_piece(const sl_body_fan *f, size_t k, int j, double ta, double tb, double xp,
                        sl_vec2 far, double *first_in, span_sink *sink)
{
    const fan_slice *fs = &f->fs[k];
    double xa = ta * xp, xb = tb * xp;
    unsigned char par = 0;
    for (uint32_t c = fs->cl_start[j]; c < fs->cl_start[j + 1]; c++) {
        if (xb <= fs->cl_lo[c])
            break;
        if (xa >= fs->cl_hi[c]) {
            par = fs->cl_par[c];
            continue;
        }
        /* the piece meets the edges: cross them, as the grid walk does */
        const bslice *s = &f->body->s[k];
        double local[LOCAL_EDGES];
        uint32_t e0 = fs->bin_start[j], e1 = fs->bin_start[j + 1];
        double *buf = local;
        if (e1 - e0 > LOCAL_EDGES) {
            buf = malloc((e1 - e0) * sizeof *buf);
            if (!buf)
                return NAN;
        }
        size_t n = 0;
        double scale = f->xfar / xp; /* segment parameter to t */
        for (uint32_t q = e0; q < e1; q++) {
            uint32_t e = fs->edges[q];
            double sp;
            if (sl_p2_crosses(f->s2, far, s->ep[e], s->ep[e + 1], &sp))
                buf[n++] = sp * scale;
        }
        if (n > 1)
            sort_small(buf, n);
        bool in = false;
        size_t i = 0;
        for (; i < n && buf[i] < ta; i++)
            in = !in;
        double total = 0, last = ta;
        if (in && isnan(*first_in))
            *first_in = ta;
        for (; i < n && buf[i] < tb; i++) {
            if (in) {
                total += buf[i] - last;
                sink_put(sink, last, buf[i]);
            } else if (isnan(*first_in)) {
                *first_in = buf[i];
            }
            in = !in;
            last = buf[i];
        }
        if (in) {
            total += tb - last;
            sink_put(sink, last, tb);
        }
        if (buf != local)
            free(buf);
        return total;
    }
    if (!par)
        return 0;
    if (isnan(*first_in))
        *first_in = ta;
    sink_put(sink, ta, tb);
    return tb - ta;
}

/* As body_path, through the fan. */
static double fan_path(const sl_body_fan *f, sl_vec3 p, double *entry_t, sl_spans *spans)
{
    if (entry_t)
        *entry_t = NAN;
    const sl_body *b = f->body;
    sl_vec3 a = f->src;
    double d[3] = {p.x - a.x, p.y - a.y, p.z - a.z};
    double len = sqrt(d[0] * d[0] + d[1] * d[1] + d[2] * d[2]);
    double xp, yp;
    fan_xy(f, (sl_vec2){p.x, p.y}, &xp, &yp);
    if (!(xp > f->xlo) || len == 0)
        return 0; /* the ray ends before the body's box */
    double tau = yp / xp;
    double fj = (tau - f->tau0) / f->dtau;
    if (!(fj >= 0 && fj < f->nb))
        return 0; /* it passes beside the body */
    int j = (int)fj;
    if (!(xp > f->bin_xlo[j]))
        return 0; /* the ray ends before any edge of its bin */
    sl_vec2 far = {f->s2.x + (f->xfar / xp) * d[0], f->s2.y + (f->xfar / xp) * d[1]};
    double t0 = dmax(f->xlo, f->bin_xlo[j]) / xp, t1 = 1;
    /* sink in t directly: base 0, scale 1 */
    span_sink sink = {spans, 0, 1, false};
    span_sink *sk = spans ? &sink : NULL;
    double first = NAN, total = 0;
    if (d[2] == 0) {
        size_t i = slab_at(b, a.z);
        if (i >= b->n || a.z < b->s[i].z_lo)
            return 0;
        total = fan_piece(f, i, j, t0, t1, xp, far, &first, sk);
    } else {
        double z0 = a.z + t0 * d[2], z1 = p.z;
        if (fmax(z0, z1) <= b->lo.z || fmin(z0, z1) >= b->hi.z)
            return 0;
        slab_walk w;
        if (!slab_walk_start(&w, b, a.z, d[2], t0, t1))
            return 0;
        size_t k;
        double ta, tb;
        while (slab_walk_next(&w, &k, &ta, &tb)) {
            double piece = fan_piece(f, k, j, ta, tb, xp, far, &first, sk);
            if (isnan(piece))
                return NAN;
            total += piece;
        }
    }
    if (isnan(total) || sink.failed)
        return NAN;
    if (entry_t)
        *entry_t = first;
    return total * len;
}

double sl_body_fan_path(const sl_body_fan *f, sl_vec3 p, double *entry_t)
{
    return fan_path(f, p, entry_t, NULL);
}

double sl_fans_path(const sl_body_fan *const *fans, size_t nfans, sl_vec3 p, double *entry_t)
{
    if (nfans == 1)
        return fan_path(fans[0], p, entry_t, NULL);
    if (entry_t)
        *entry_t = NAN;
    double local[64];
    sl_spans sp = {local, 0, sizeof local / sizeof *local, false};
    for (size_t i = 0; i < nfans; i++) {
        if (isnan(fan_path(fans[i], p, NULL, &sp))) {
            sl_spans_free(&sp);
            return NAN;
        }
    }
    return spans_path(&sp, fans[0]->src, p, entry_t);
}
