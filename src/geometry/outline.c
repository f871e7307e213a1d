/*
 * Outlines and exact signed distances (see include/strayline/outline.h).
 *
 * Sign from the nearest feature: with every loop oriented so that the region
 * is on its left, a point whose nearest boundary point lies inside an edge is
 * inside exactly when it is left of that edge; when the nearest point is a
 * vertex, it is inside when it is left of both edges meeting there (convex
 * vertex) or of either (reflex vertex). This holds for any nearest feature,
 * so ties between features do not matter.
 */
#include "strayline/outline.h"
#include "strayline/poly2d.h"

#include <float.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

typedef struct edge {
    sl_vec2 a, b;
    double dx, dy, len2; /* b - a and its squared length, for the nearest search */
    unsigned prev, next; /* neighbouring edges in the loop */
    bool convex_a;       /* the region's corner at a is convex */
} edge;

struct sl_outline {
    size_t nloops;
    sl_vec2 **loop_pts;
    size_t *loop_n;
    int *loop_depth;
    size_t nedges;
    edge *edges;
    sl_vec2 lo, hi;
    double area;
    /* index: a tree of square nodes, each split into 4 x 4 children until
     * it keeps few candidate edges */
    bool indexed;
    sl_vec2 root_lo;
    double root_size;
    size_t nnodes;
    struct node *nodes;
    unsigned *cand; /* candidate edge lists of the leaves */
};

typedef struct node {
    int child;      /* first of 16 children, or -1 for a leaf */
    unsigned start; /* leaf: candidates cand[start .. start + count) */
    unsigned count;
} node;

#define SPLIT 4      /* children per side */
#define MAX_DEPTH 6  /* 4^6 = 4096 leaves a side at most */
#define LEAF_EDGES 12 /* a node with more candidates is split */

static sl_status clean_loop(const sl_outline_loop *in, size_t k, const char *what, sl_vec2 **out,
                            size_t *nout, sl_error *err)
{
    const double eps = 1e-7; /* cm: coincident points */
    sl_vec2 *p = malloc((in->n ? in->n : 1) * sizeof *p);
    if (!p)
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    size_t n = 0;
    for (size_t i = 0; i < in->n; i++) {
        sl_vec2 v = in->points[i];
        if (!isfinite(v.x) || !isfinite(v.y)) {
            free(p);
            return sl_error_set(err, SL_EINPUT, "%s: loop %zu: point %zu is not finite", what,
                                k + 1, i + 1);
        }
        if (n > 0 && fabs(v.x - p[n - 1].x) < eps && fabs(v.y - p[n - 1].y) < eps)
            continue;
        p[n++] = v;
    }
    while (n > 1 && fabs(p[0].x - p[n - 1].x) < eps && fabs(p[0].y - p[n - 1].y) < eps)
        n--;
    if (n < 3) {
        free(p);
        return sl_error_set(err, SL_EINPUT,
                            "%s: loop %zu has %zu distinct points; an outline needs at least 3",
                            what, k + 1, n);
    }
    *out = p;
    *nout = n;
    return SL_OK;
}

static sl_status check_simple(const sl_outline *o, const char *what, sl_error *err)
{
    /* adjacent edges must not fold back on each other */
    for (size_t k = 0; k < o->nloops; k++) {
        const sl_vec2 *p = o->loop_pts[k];
        size_t n = o->loop_n[k];
        for (size_t i = 0; i < n; i++) {
            sl_vec2 a = p[(i + n - 1) % n], b = p[i], c = p[(i + 1) % n];
            double cr = sl_p2_cross(a, b, c);
            double dot = (b.x - a.x) * (c.x - b.x) + (b.y - a.y) * (c.y - b.y);
            double scale = hypot(b.x - a.x, b.y - a.y) * hypot(c.x - b.x, c.y - b.y);
            if (fabs(cr) <= 1e-12 * scale && dot < 0)
                return sl_error_set(err, SL_EINPUT,
                                    "%s: loop %zu folds back on itself at point %zu", what, k + 1,
                                    i + 1);
        }
    }
    for (size_t i = 0; i < o->nedges; i++) {
        const edge *e = &o->edges[i];
        double xlo = fmin(e->a.x, e->b.x), xhi = fmax(e->a.x, e->b.x);
        double ylo = fmin(e->a.y, e->b.y), yhi = fmax(e->a.y, e->b.y);
        for (size_t j = i + 1; j < o->nedges; j++) {
            const edge *f = &o->edges[j];
            if (f->prev == i || f->next == i)
                continue; /* neighbours share a vertex by construction */
            if (fmax(f->a.x, f->b.x) < xlo || fmin(f->a.x, f->b.x) > xhi ||
                fmax(f->a.y, f->b.y) < ylo || fmin(f->a.y, f->b.y) > yhi)
                continue;
            if (sl_p2_segments_meet(e->a, e->b, f->a, f->b))
                return sl_error_set(err, SL_EINPUT,
                                    "%s: the outline crosses itself or touches another loop "
                                    "(near %.2f, %.2f cm): a cutout must be a simple polygon",
                                    what, e->a.x, e->a.y);
        }
    }
    return SL_OK;
}

void sl_outline_free(sl_outline *o)
{
    if (!o)
        return;
    for (size_t k = 0; k < o->nloops; k++)
        free(o->loop_pts[k]);
    free(o->loop_pts);
    free(o->loop_n);
    free(o->loop_depth);
    free(o->edges);
    free(o->nodes);
    free(o->cand);
    free(o);
}

sl_status sl_outline_create(const sl_outline_loop *loops, size_t nloops, const char *what,
                            sl_outline **out, sl_error *err)
{
    *out = NULL;
    if (nloops == 0)
        return sl_error_set(err, SL_EINPUT, "%s: no outline", what);
    size_t nv = 0;
    for (size_t k = 0; k < nloops; k++)
        nv += loops[k].n;
    if (nv > SL_OUTLINE_MAX_VERTICES)
        return sl_error_set(err, SL_EINPUT, "%s: %zu vertices (at most %d are accepted)", what,
                            nv, SL_OUTLINE_MAX_VERTICES);
    sl_outline *o = calloc(1, sizeof *o);
    if (!o)
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    o->loop_pts = calloc(nloops, sizeof *o->loop_pts);
    o->loop_n = calloc(nloops, sizeof *o->loop_n);
    o->loop_depth = calloc(nloops, sizeof *o->loop_depth);
    if (!o->loop_pts || !o->loop_n || !o->loop_depth) {
        sl_outline_free(o);
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    }
    o->nloops = nloops;
    size_t total = 0;
    for (size_t k = 0; k < nloops; k++) {
        sl_status st = clean_loop(&loops[k], k, what, &o->loop_pts[k], &o->loop_n[k], err);
        if (st != SL_OK) {
            sl_outline_free(o);
            return st;
        }
        if (fabs(sl_p2_area(o->loop_pts[k], o->loop_n[k])) < 1e-10) {
            sl_outline_free(o);
            return sl_error_set(err, SL_EINPUT, "%s: loop %zu encloses no area", what, k + 1);
        }
        total += o->loop_n[k];
    }
    if (total > 1000000) {
        sl_outline_free(o);
        return sl_error_set(err, SL_EINPUT, "%s: %zu outline points, more than strayline accepts",
                            what, total);
    }
    /* nesting depth of each loop, then orientation: region on the left */
    for (size_t k = 0; k < nloops; k++) {
        int depth = 0;
        for (size_t m = 0; m < nloops; m++) {
            if (m != k && sl_p2_inside(o->loop_pts[k][0], o->loop_pts[m], o->loop_n[m]))
                depth++;
        }
        o->loop_depth[k] = depth;
        bool ccw = sl_p2_area(o->loop_pts[k], o->loop_n[k]) > 0;
        bool want_ccw = depth % 2 == 0;
        if (ccw != want_ccw) {
            sl_vec2 *p = o->loop_pts[k];
            for (size_t i = 0, j = o->loop_n[k] - 1; i < j; i++, j--) {
                sl_vec2 t = p[i];
                p[i] = p[j];
                p[j] = t;
            }
        }
    }
    o->edges = malloc(total * sizeof *o->edges);
    if (!o->edges) {
        sl_outline_free(o);
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    }
    o->lo = (sl_vec2){DBL_MAX, DBL_MAX};
    o->hi = (sl_vec2){-DBL_MAX, -DBL_MAX};
    size_t e = 0;
    o->area = 0;
    for (size_t k = 0; k < nloops; k++) {
        const sl_vec2 *p = o->loop_pts[k];
        size_t n = o->loop_n[k];
        o->area += sl_p2_area(p, n);
        for (size_t i = 0; i < n; i++) {
            edge *ed = &o->edges[e + i];
            ed->a = p[i];
            ed->b = p[(i + 1) % n];
            ed->dx = ed->b.x - ed->a.x;
            ed->dy = ed->b.y - ed->a.y;
            ed->len2 = ed->dx * ed->dx + ed->dy * ed->dy;
            ed->prev = (unsigned)(e + (i + n - 1) % n);
            ed->next = (unsigned)(e + (i + 1) % n);
            ed->convex_a = sl_p2_cross(p[(i + n - 1) % n], p[i], p[(i + 1) % n]) > 0;
            o->lo.x = fmin(o->lo.x, p[i].x);
            o->lo.y = fmin(o->lo.y, p[i].y);
            o->hi.x = fmax(o->hi.x, p[i].x);
            o->hi.y = fmax(o->hi.y, p[i].y);
        }
        e += n;
    }
    o->nedges = total;
    sl_status st = check_simple(o, what, err);
    if (st != SL_OK) {
        sl_outline_free(o);
        return st;
    }
    *out = o;
    return SL_OK;
}

sl_status sl_outline_rectangle(double w, double h, const char *what, sl_outline **out,
                               sl_error *err)
{
    if (!(w > 0 && h > 0 && isfinite(w) && isfinite(h)))
        return sl_error_set(err, SL_EINPUT, "%s: field size %g x %g cm is not valid", what, w, h);
    sl_vec2 p[4] = {{-w / 2, -h / 2}, {w / 2, -h / 2}, {w / 2, h / 2}, {-w / 2, h / 2}};
    sl_outline_loop loop = {p, 4};
    return sl_outline_create(&loop, 1, what, out, err);
}

sl_status sl_outline_circle(double d, const char *what, sl_outline **out, sl_error *err)
{
    if (!(d > 0 && isfinite(d)))
        return sl_error_set(err, SL_EINPUT, "%s: field diameter %g cm is not valid", what, d);
    enum { N = 360 };
    sl_vec2 p[N];
    /* vertices on a circle of the same area as the nominal one */
    double r = d / 2 * sqrt((2 * M_PI / N) / sin(2 * M_PI / N));
    for (int i = 0; i < N; i++)
        p[i] = (sl_vec2){r * cos(2 * M_PI * i / N), r * sin(2 * M_PI * i / N)};
    sl_outline_loop loop = {p, N};
    return sl_outline_create(&loop, 1, what, out, err);
}

sl_status sl_outline_scaled(const sl_outline *o, double f, sl_outline **out, sl_error *err)
{
    sl_outline_loop *loops = calloc(o->nloops, sizeof *loops);
    sl_vec2 **pts = calloc(o->nloops, sizeof *pts);
    sl_status st = SL_OK;
    if (!loops || !pts)
        st = sl_error_set(err, SL_ENOMEM, "out of memory");
    for (size_t k = 0; st == SL_OK && k < o->nloops; k++) {
        pts[k] = malloc(o->loop_n[k] * sizeof **pts);
        if (!pts[k]) {
            st = sl_error_set(err, SL_ENOMEM, "out of memory");
            break;
        }
        for (size_t i = 0; i < o->loop_n[k]; i++)
            pts[k][i] = (sl_vec2){o->loop_pts[k][i].x * f, o->loop_pts[k][i].y * f};
        loops[k] = (sl_outline_loop){pts[k], o->loop_n[k]};
    }
    if (st == SL_OK)
        st = sl_outline_create(loops, o->nloops, "scaled outline", out, err);
    for (size_t k = 0; pts && k < o->nloops; k++)
        free(pts[k]);
    free(pts);
    free(loops);
    return st;
}

/* Distance to every edge; the nearest feature decides the sign. */
/* sl_p2_seg_dist2 on an edge whose difference and squared length are
 * kept: the same arithmetic, and no division where the nearest point is an
 * end (the quotient would be clamped to it); bitwise the same distance. */
static inline double edge_dist2(const edge *e, sl_vec2 q, double *t_out)
{
    double t = 0;
    if (e->len2 > 0) {
        double num = (q.x - e->a.x) * e->dx + (q.y - e->a.y) * e->dy;
        t = num <= 0 ? 0 : num >= e->len2 ? 1 : num / e->len2;
    }
    double px = e->a.x + t * e->dx - q.x, py = e->a.y + t * e->dy - q.y;
    *t_out = t;
    return px * px + py * py;
}

static double nearest(const sl_outline *o, sl_vec2 q, const unsigned *cand, size_t ncand)
{
    double best = DBL_MAX, best_t = 0;
    unsigned best_e = 0;
    for (size_t k = 0; k < ncand; k++) {
        unsigned i = cand ? cand[k] : (unsigned)k;
        double t;
        double d2 = edge_dist2(&o->edges[i], q, &t);
        if (d2 < best) {
            best = d2;
            best_e = i;
            best_t = t;
        }
    }
    double d = sqrt(best);
    if (d == 0)
        return 0;
    const edge *e = &o->edges[best_e];
    bool inside;
    if (best_t > 0 && best_t < 1) {
        inside = sl_p2_cross(e->a, e->b, q) > 0;
    } else {
        /* nearest point is a vertex: edges `in` and `out` meet there */
        const edge *in = best_t <= 0 ? &o->edges[e->prev] : e;
        const edge *outg = best_t <= 0 ? e : &o->edges[e->next];
        bool l1 = sl_p2_cross(in->a, in->b, q) > 0;
        bool l2 = sl_p2_cross(outg->a, outg->b, q) > 0;
        inside = outg->convex_a ? (l1 && l2) : (l1 || l2);
    }
    return inside ? -d : d;
}

double sl_outline_distance(const sl_outline *o, sl_vec2 q)
{
    if (o->indexed) {
        double x0 = o->root_lo.x, y0 = o->root_lo.y, size = o->root_size;
        if (q.x >= x0 && q.y >= y0 && q.x < x0 + size && q.y < y0 + size) {
            const node *n = &o->nodes[0];
            while (n->child >= 0) {
                size /= SPLIT;
                int ix = (int)((q.x - x0) / size), iy = (int)((q.y - y0) / size);
                ix = ix < 0 ? 0 : ix >= SPLIT ? SPLIT - 1 : ix;
                iy = iy < 0 ? 0 : iy >= SPLIT ? SPLIT - 1 : iy;
                x0 += ix * size;
                y0 += iy * size;
                n = &o->nodes[n->child + iy * SPLIT + ix];
            }
            return nearest(o, q, o->cand + n->start, n->count);
        }
    }
    return nearest(o, q, NULL, o->nedges);
}

/* Distance between the square [x0, x0+s] x [y0, y0+s] and segment ab. */
static double square_segment_distance(double x0, double y0, double s, sl_vec2 a, sl_vec2 b)
{
    /* do they meet? (clip the segment to the square) */
    double t0 = 0, t1 = 1, dx = b.x - a.x, dy = b.y - a.y;
    const double p[4] = {-dx, dx, -dy, dy};
    const double q[4] = {a.x - x0, x0 + s - a.x, a.y - y0, y0 + s - a.y};
    bool meet = true;
    for (int i = 0; i < 4 && meet; i++) {
        if (p[i] == 0) {
            if (q[i] < 0)
                meet = false;
        } else {
            double r = q[i] / p[i];
            if (p[i] < 0)
                t0 = fmax(t0, r);
            else
                t1 = fmin(t1, r);
            if (t0 > t1)
                meet = false;
        }
    }
    if (meet)
        return 0;
    /* apart: the nearest pair includes an endpoint or a corner */
    double best = DBL_MAX;
    const sl_vec2 ends[2] = {a, b};
    for (int i = 0; i < 2; i++) {
        double ex = fmax(fmax(x0 - ends[i].x, 0), ends[i].x - x0 - s);
        double ey = fmax(fmax(y0 - ends[i].y, 0), ends[i].y - y0 - s);
        best = fmin(best, ex * ex + ey * ey);
    }
    const sl_vec2 corners[4] = {{x0, y0}, {x0 + s, y0}, {x0, y0 + s}, {x0 + s, y0 + s}};
    for (int i = 0; i < 4; i++)
        best = fmin(best, sl_p2_seg_dist2(corners[i], a, b, NULL));
    return sqrt(best);
}

typedef struct builder {
    const sl_outline *o;
    node *nodes;
    size_t nnodes, cap_nodes;
    unsigned *cand;
    size_t ncand, cap_cand;
    unsigned *scratch; /* one list of nedges a depth */
    bool failed;
} builder;

/* Can edge e be nearest, through its interior or one of its ends, to some
 * point of the square? Only where its strip (the points whose projection
 * falls on e) or one of its end wedges (beyond an end, on the near side of
 * the neighbouring edge's strip) meets the square. This is what keeps far
 * cells to a handful of candidates: a far cell meets few strips, however
 * many vertices the outline has. */
static bool voronoi_meets(const sl_outline *o, const edge *e, const sl_vec2 corners[4])
{
    double dx = e->b.x - e->a.x, dy = e->b.y - e->a.y, len2 = dx * dx + dy * dy;
    double tmin = DBL_MAX, tmax = -DBL_MAX;
    for (int i = 0; i < 4; i++) {
        double t = ((corners[i].x - e->a.x) * dx + (corners[i].y - e->a.y) * dy) / len2;
        tmin = fmin(tmin, t);
        tmax = fmax(tmax, t);
    }
    const double eps = 1e-9;
    if (tmax >= -eps && tmin <= 1 + eps)
        return true;
    if (tmax < 0) {
        /* wedge at a: beyond the end of the previous edge p -> a */
        sl_vec2 p = o->edges[e->prev].a;
        double best = -DBL_MAX;
        for (int i = 0; i < 4; i++)
            best = fmax(best, (corners[i].x - e->a.x) * (e->a.x - p.x) +
                                  (corners[i].y - e->a.y) * (e->a.y - p.y));
        return best >= -eps * len2;
    }
    /* wedge at b: before the start of the next edge b -> c */
    sl_vec2 c = o->edges[e->next].b;
    double best = DBL_MAX;
    for (int i = 0; i < 4; i++)
        best = fmin(best, (corners[i].x - e->b.x) * (c.x - e->b.x) +
                              (corners[i].y - e->b.y) * (c.y - e->b.y));
    return best <= eps * len2;
}

/* The edges of `in` that can be nearest to some point of a square: those
 * whose strip or end wedges meet it (above), and that are no farther from
 * the square than U, the least over edges of the largest corner distance
 * (the distance to a segment is convex, so no point of the square lies
 * farther than U from its nearest edge). A parent's list holds every
 * child's, so each level filters the last. */
static size_t filter(const sl_outline *o, double x0, double y0, double s, const unsigned *in,
                     size_t nin, unsigned *out)
{
    const sl_vec2 corners[4] = {{x0, y0}, {x0 + s, y0}, {x0, y0 + s}, {x0 + s, y0 + s}};
    double u = DBL_MAX;
    for (size_t k = 0; k < nin; k++) {
        const edge *e = &o->edges[in[k]];
        double worst = 0;
        for (int i = 0; i < 4; i++)
            worst = fmax(worst, sl_p2_seg_dist2(corners[i], e->a, e->b, NULL));
        u = fmin(u, worst);
    }
    u = sqrt(u) * (1 + 1e-12) + 1e-12;
    size_t n = 0;
    for (size_t k = 0; k < nin; k++) {
        const edge *e = &o->edges[in[k]];
        if (voronoi_meets(o, e, corners) && square_segment_distance(x0, y0, s, e->a, e->b) <= u)
            out[n++] = in[k];
    }
    return n;
}

static void build_node(builder *b, size_t at, double x0, double y0, double s, int depth,
                       const unsigned *in, size_t nin)
{
    unsigned *mine = b->scratch + (size_t)depth * b->o->nedges;
    size_t n = filter(b->o, x0, y0, s, in, nin, mine);
    if (n > LEAF_EDGES && depth < MAX_DEPTH) {
        if (b->nnodes + SPLIT * SPLIT > b->cap_nodes) {
            size_t cap = b->cap_nodes * 2 + SPLIT * SPLIT;
            node *nn = realloc(b->nodes, cap * sizeof *nn);
            if (!nn) {
                b->failed = true;
                return;
            }
            b->nodes = nn;
            b->cap_nodes = cap;
        }
        size_t first = b->nnodes;
        b->nnodes += SPLIT * SPLIT;
        b->nodes[at] = (node){(int)first, 0, 0};
        double cs = s / SPLIT;
        for (int iy = 0; iy < SPLIT && !b->failed; iy++)
            for (int ix = 0; ix < SPLIT && !b->failed; ix++)
                build_node(b, first + (size_t)(iy * SPLIT + ix), x0 + ix * cs, y0 + iy * cs, cs,
                           depth + 1, mine, n);
        return;
    }
    if (b->ncand + n > b->cap_cand) {
        size_t cap = (b->cap_cand + n) * 2;
        unsigned *nc = realloc(b->cand, cap * sizeof *nc);
        if (!nc) {
            b->failed = true;
            return;
        }
        b->cand = nc;
        b->cap_cand = cap;
    }
    memcpy(b->cand + b->ncand, mine, n * sizeof *mine);
    b->nodes[at] = (node){-1, (unsigned)b->ncand, (unsigned)n};
    b->ncand += n;
}

sl_status sl_outline_index(sl_outline *o, sl_vec2 lo, sl_vec2 hi, sl_error *err)
{
    free(o->nodes);
    free(o->cand);
    o->nodes = NULL;
    o->cand = NULL;
    o->indexed = false;
    if (!(isfinite(lo.x) && isfinite(lo.y) && isfinite(hi.x) && isfinite(hi.y)))
        return sl_error_set(err, SL_EINTERNAL, "outline index over a non-finite box");
    lo.x = fmin(lo.x, o->lo.x) - 0.5;
    lo.y = fmin(lo.y, o->lo.y) - 0.5;
    hi.x = fmax(hi.x, o->hi.x) + 0.5;
    hi.y = fmax(hi.y, o->hi.y) + 0.5;
    builder b = {o, NULL, 1, 1 + SPLIT * SPLIT, NULL, 0, 0, NULL, false};
    b.nodes = malloc(b.cap_nodes * sizeof *b.nodes);
    b.scratch = malloc((size_t)(MAX_DEPTH + 1) * o->nedges * sizeof *b.scratch);
    unsigned *all = malloc(o->nedges * sizeof *all);
    if (!b.nodes || !b.scratch || !all) {
        free(b.nodes);
        free(b.scratch);
        free(all);
        return sl_error_set(err, SL_ENOMEM, "out of memory indexing an outline");
    }
    for (size_t i = 0; i < o->nedges; i++)
        all[i] = (unsigned)i;
    double size = fmax(hi.x - lo.x, hi.y - lo.y);
    build_node(&b, 0, lo.x, lo.y, size, 0, all, o->nedges);
    free(all);
    free(b.scratch);
    if (b.failed) {
        free(b.nodes);
        free(b.cand);
        return sl_error_set(err, SL_ENOMEM, "out of memory indexing an outline");
    }
    o->nodes = b.nodes;
    o->nnodes = b.nnodes;
    o->cand = b.cand;
    o->root_lo = lo;
    o->root_size = size;
    o->indexed = true;
    return SL_OK;
}

double sl_outline_area(const sl_outline *o)
{
    return o->area;
}

void sl_outline_bounds(const sl_outline *o, sl_vec2 *lo, sl_vec2 *hi)
{
    *lo = o->lo;
    *hi = o->hi;
}

bool sl_outline_index_splits(const sl_outline *o)
{
    return o->nedges > LEAF_EDGES;
}

bool sl_outline_convex(const sl_outline *o)
{
    if (o->nloops != 1)
        return false;
    for (size_t i = 0; i < o->nedges; i++)
        if (!o->edges[i].convex_a)
            return false;
    return true;
}

size_t sl_outline_loop_count(const sl_outline *o)
{
    return o->nloops;
}

const sl_vec2 *sl_outline_loop_points(const sl_outline *o, size_t i, size_t *n)
{
    *n = o->loop_n[i];
    return o->loop_pts[i];
}

int sl_outline_loop_depth(const sl_outline *o, size_t i)
{
    return o->loop_depth[i];
}
