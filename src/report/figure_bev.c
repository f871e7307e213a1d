/*
 * The beam's-eye view (see figure.h): what the beam's source sees at the
 * isocentric plane, in IEC beam-limiting-device coordinates (X to the
 * right, Y up, as seen from the source).
 *
 * Each organ is drawn as the divergent projection of its contours, each
 * contour taken as the slab it stands for (half the distance to the next
 * slice either side): the projection of a slab is the union of the
 * projections of its two faces and of its side faces, and filling all of
 * them by the non-zero rule draws that union, so the picture shows the
 * organ's real outline with no gaps between slices and no convex hull. The
 * outline is a wide stroke under an opaque fill, which leaves only the
 * outer half of the stroke visible: the silhouette, not the slices.
 *
 * Organs are coloured by their status (fig_status_rgb) and labelled with
 * the status's shape, their name and a small swatch of their DICOM display
 * colour. Labels are placed greedily, most urgent status first, at the first
 * candidate place that overlaps no label or arrow already placed and lies
 * wholly inside the picture, with a leader line when it had to move away.
 * Organs outside the picture get an arrow at its edge, toward their nearest
 * point, with their distance from the field edge.
 */
#include "figure.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

/* Most vertices a contour keeps in the picture: finer detail is below a
 * point at any size a report uses. */
#define BEV_MAX_CONTOUR_VERTICES 64
/* Labels already placed beyond which a label that finds no room beside its
 * organ is left out (and counted in the legend) rather than searched for. */
#define BEV_MAX_SCANNED_LABELS 150

void fig_bev_directions(const sl_frame *f, char right[4], char left[4], char up[4], char down[4])
{
    sl_vec3 o = sl_frame_to_patient(f, (sl_vec3){0, 0, 0});
    sl_vec3 ax[2] = {sl_frame_to_patient(f, (sl_vec3){1, 0, 0}),
                     sl_frame_to_patient(f, (sl_vec3){0, 1, 0})};
    char *out[2][2] = {{right, left}, {up, down}};
    /* DICOM patient axes (LPS): +x left, +y posterior, +z head */
    static const char pos[3] = {'L', 'P', 'H'}, neg[3] = {'R', 'A', 'F'};
    for (int k = 0; k < 2; k++) {
        double c[3] = {ax[k].x - o.x, ax[k].y - o.y, ax[k].z - o.z};
        int order[3] = {0, 1, 2};
        for (int i = 0; i < 3; i++)
            for (int j = i + 1; j < 3; j++)
                if (fabs(c[order[j]]) > fabs(c[order[i]])) {
                    int t = order[i];
                    order[i] = order[j];
                    order[j] = t;
                }
        size_t n = 0;
        for (int i = 0; i < 3; i++) {
            int a = order[i];
            /* a component of a quarter or more (about 15 degrees) is named */
            if (i == 0 || fabs(c[a]) >= 0.25) {
                out[k][0][n] = c[a] > 0 ? pos[a] : neg[a];
                out[k][1][n] = c[a] > 0 ? neg[a] : pos[a];
                n++;
            }
        }
        out[k][0][n] = out[k][1][n] = '\0';
    }
}

/* ------------------------------------------------------------ polygons -- */

typedef struct polys {
    sl_vec2 *p;
    size_t n, cap;
    size_t *start; /* polygon i is p[start[i] .. start[i+1]) */
    size_t np, scap;
    bool failed;
} polys;

static void polys_add_point(polys *s, sl_vec2 q)
{
    if (s->n == s->cap) {
        size_t cap = s->cap ? s->cap * 2 : 256;
        sl_vec2 *p = realloc(s->p, cap * sizeof *p);
        if (!p) {
            s->failed = true;
            return;
        }
        s->p = p;
        s->cap = cap;
    }
    s->p[s->n++] = q;
}

static void polys_begin(polys *s)
{
    if (s->np + 2 > s->scap) {
        size_t cap = s->scap ? s->scap * 2 : 64;
        size_t *st = realloc(s->start, cap * sizeof *st);
        if (!st) {
            s->failed = true;
            return;
        }
        s->start = st;
        s->scap = cap;
    }
    s->start[s->np] = s->n;
}

static void polys_end(polys *s)
{
    if (s->failed)
        return;
    s->np++;
    s->start[s->np] = s->n;
}

static void polys_free(polys *s)
{
    free(s->p);
    free(s->start);
}

static double signed_area(const sl_vec2 *p, size_t n)
{
    double a = 0;
    for (size_t i = 0; i < n; i++) {
        sl_vec2 u = p[i], v = p[(i + 1) % n];
        a += u.x * v.y - v.x * u.y;
    }
    return a / 2;
}

/* --------------------------------------------------------------- organs -- */

typedef struct bev_organ {
    size_t o;
    const sl_roi *roi;
    sl_status_kind status;
    polys shape;          /* projected faces, iso-plane cm, all counter-clockwise */
    bool point;           /* a POINT ROI: a marker */
    sl_vec2 at;           /* the point's projection, or the nearest sample's */
    bool has_at;
    sl_vec2 lo, hi;       /* bounds of the projection (cm) */
    bool any;             /* something was projected */
    bool outside;         /* wholly outside the picture */
    double dist_cm;       /* from this beam's field edge */
} bev_organ;

static bool project(const sl_frame *f, sl_vec3 p_cm, sl_vec2 *uv)
{
    double sc;
    return sl_frame_project(f, sl_frame_to_bld(f, p_cm), uv, &sc);
}

static int cmp_double(const void *a, const void *b)
{
    double x = *(const double *)a, y = *(const double *)b;
    return x < y ? -1 : x > y;
}

static void grow(bev_organ *g, sl_vec2 q)
{
    if (!g->any) {
        g->lo = g->hi = q;
        g->any = true;
        return;
    }
    g->lo.x = fmin(g->lo.x, q.x);
    g->lo.y = fmin(g->lo.y, q.y);
    g->hi.x = fmax(g->hi.x, q.x);
    g->hi.y = fmax(g->hi.y, q.y);
}

/* Add a polygon, turned counter-clockwise so that the non-zero rule fills
 * the union of all of them; slivers of no area are left out. */
static void add_ccw(polys *s, const sl_vec2 *q, size_t n)
{
    double a = signed_area(q, n);
    if (fabs(a) < 1e-8)
        return;
    polys_begin(s);
    for (size_t i = 0; i < n; i++)
        polys_add_point(s, a > 0 ? q[i] : q[n - 1 - i]);
    polys_end(s);
}

/* The projection of one slab, a contour's polygon swept from its bottom
 * face (bot) to its top face (top), as one closed cycle: the convolution of
 * the polygon with the sweep. Each edge is taken on the face whose side it
 * faces (its outward normal against the sweep), and where the choice
 * changes a connecting edge joins the faces; the region of positive winding
 * of that cycle is the swept area (the convolution method of Minkowski
 * sums, a polygon with a segment). cyc has room for 2 m points. */
static void slab_outline(polys *s, sl_vec2 *bot, sl_vec2 *top, size_t m, sl_vec2 *cyc)
{
    if (signed_area(bot, m) < 0) /* counter-clockwise, so outward normals point right */
        for (size_t i = 0, j = m - 1; i < j; i++, j--) {
            sl_vec2 t = bot[i];
            bot[i] = bot[j];
            bot[j] = t;
            t = top[i];
            top[i] = top[j];
            top[j] = t;
        }
    bool up_prev = false;
    for (size_t pass = 0; pass < 2; pass++) {
        size_t k = 0;
        for (size_t i = 0; i < m; i++) {
            size_t j = (i + 1) % m;
            sl_vec2 e = {bot[j].x - bot[i].x, bot[j].y - bot[i].y};
            sl_vec2 sw = {(top[i].x - bot[i].x + top[j].x - bot[j].x) / 2,
                          (top[i].y - bot[i].y + top[j].y - bot[j].y) / 2};
            bool up = e.y * sw.x - e.x * sw.y > 0; /* outward normal (e.y, -e.x) . sweep */
            if (pass == 0) {
                if (i == m - 1)
                    up_prev = up; /* the edge before vertex 0 */
                continue;
            }
            if (up != up_prev)
                cyc[k++] = up_prev ? top[i] : bot[i];
            cyc[k++] = up ? top[i] : bot[i];
            up_prev = up;
        }
        if (pass == 1)
            add_ccw(s, cyc, k);
    }
}

static void organ_project(const sl_estimate_report *r, const sl_beam_place *bp, size_t o,
                          bev_organ *g)
{
    const sl_roi *roi = r->loc->rois[o];
    const sl_frame *f = &bp->frame;
    g->o = o;
    g->roi = roi;
    /* slab half-thickness of each slice: half the gap to its neighbours (mm) */
    size_t nz = 0;
    double *zs = malloc((roi->ncontours + 1) * sizeof *zs);
    if (!zs) {
        g->shape.failed = true;
        return;
    }
    for (size_t k = 0; k < roi->ncontours; k++) {
        const sl_contour *c = &roi->contours[k];
        if (c->type == SL_CONTOUR_POINT && c->npoints >= 1) {
            sl_vec2 uv;
            sl_vec3 p = c->points[0];
            if (project(f, (sl_vec3){p.x / 10, p.y / 10, p.z / 10}, &uv)) {
                g->point = true;
                g->at = uv;
                g->has_at = true;
                grow(g, uv);
            }
        } else if ((c->type == SL_CONTOUR_CLOSED_PLANAR ||
                    c->type == SL_CONTOUR_CLOSEDPLANAR_XOR) && c->npoints >= 3) {
            zs[nz++] = c->points[0].z;
        }
    }
    qsort(zs, nz, sizeof *zs, cmp_double);
    size_t nu = 0;
    for (size_t i = 0; i < nz; i++)
        if (nu == 0 || zs[i] - zs[nu - 1] > 1e-3)
            zs[nu++] = zs[i];
    double typical_mm = r->loc->slice_spacing_cm > 0 ? r->loc->slice_spacing_cm * 10 : 3;
    sl_vec2 *bot = malloc(4 * BEV_MAX_CONTOUR_VERTICES * sizeof *bot);
    if (!bot) {
        free(zs);
        g->shape.failed = true;
        return;
    }
    sl_vec2 *top = bot + BEV_MAX_CONTOUR_VERTICES, *cyc = top + BEV_MAX_CONTOUR_VERTICES;
    for (size_t k = 0; k < roi->ncontours && !g->shape.failed; k++) {
        const sl_contour *c = &roi->contours[k];
        if (!(c->type == SL_CONTOUR_CLOSED_PLANAR || c->type == SL_CONTOUR_CLOSEDPLANAR_XOR) ||
            c->npoints < 3)
            continue;
        double z = c->points[0].z, half = typical_mm / 2;
        for (size_t i = 0; i < nu; i++)
            if (fabs(zs[i] - z) < 1e-3) {
                double gap = INFINITY;
                if (i > 0)
                    gap = fmin(gap, zs[i] - zs[i - 1]);
                if (i + 1 < nu)
                    gap = fmin(gap, zs[i + 1] - zs[i]);
                if (isfinite(gap))
                    half = gap / 2;
                break;
            }
        size_t stride = (c->npoints + BEV_MAX_CONTOUR_VERTICES - 1) / BEV_MAX_CONTOUR_VERTICES;
        size_t m = 0;
        bool ok = true;
        for (size_t i = 0; i < c->npoints && ok; i += stride, m++) {
            sl_vec3 p = c->points[i];
            ok = project(f, (sl_vec3){p.x / 10, p.y / 10, (z - half) / 10}, &bot[m]) &&
                 project(f, (sl_vec3){p.x / 10, p.y / 10, (z + half) / 10}, &top[m]);
        }
        if (!ok || m < 3)
            continue;
        for (size_t i = 0; i < m; i++) {
            grow(g, bot[i]);
            grow(g, top[i]);
        }
        slab_outline(&g->shape, bot, top, m, cyc);
    }
    free(bot);
    free(zs);
    const sl_organ_place *pl = &bp->organs[o];
    g->dist_cm = pl->min_distance_cm;
    if (!g->has_at && pl->placed && r->loc->samples[o].n > pl->nearest &&
        project(f, r->loc->samples[o].points[pl->nearest], &g->at))
        g->has_at = true;
}

/* ---------------------------------------------------------- placement -- */

typedef struct rect {
    double x0, y0, x1, y1;
} rect;

static double overlap(rect a, rect b)
{
    double w = fmin(a.x1, b.x1) - fmax(a.x0, b.x0), h = fmin(a.y1, b.y1) - fmax(a.y0, b.y0);
    return w > 0 && h > 0 ? w * h : 0;
}

static bool inside(rect a, rect box)
{
    return a.x0 >= box.x0 && a.y0 >= box.y0 && a.x1 <= box.x1 && a.y1 <= box.y1;
}

typedef struct placer {
    rect *r;
    size_t n, cap;
    rect box;
} placer;

static bool placer_free_at(const placer *p, rect a)
{
    if (!inside(a, p->box))
        return false;
    for (size_t i = 0; i < p->n; i++)
        if (overlap(a, p->r[i]) > 0)
            return false;
    return true;
}

static void placer_add(placer *p, rect a)
{
    if (p->n == p->cap) {
        size_t cap = p->cap ? p->cap * 2 : 32;
        rect *r = realloc(p->r, cap * sizeof *r);
        if (!r)
            return; /* a label may then overlap: the picture stays right */
        p->r = r;
        p->cap = cap;
    }
    p->r[p->n++] = a;
}

/* The first free place for a w x h label near the box b (points), trying
 * beside, above, below, then farther away; else the free place nearest to
 * it anywhere in the box. `avoid` are boxes a label should rather not cover
 * (other organs). */
static bool place_label(const placer *p, rect b, double w, double h, const rect *avoid,
                        size_t navoid, rect *out)
{
    double g = 2.5, cx = (b.x0 + b.x1) / 2, cy = (b.y0 + b.y1) / 2;
    rect best = {0};
    double best_score = INFINITY;
    for (int k = 0; k <= 8; k++) {
        double dy = k * (h + 1);
        rect c[] = {
            {b.x1 + g, cy - h / 2 - dy, b.x1 + g + w, cy + h / 2 - dy},
            {b.x1 + g, cy - h / 2 + dy, b.x1 + g + w, cy + h / 2 + dy},
            {b.x0 - g - w, cy - h / 2 - dy, b.x0 - g, cy + h / 2 - dy},
            {b.x0 - g - w, cy - h / 2 + dy, b.x0 - g, cy + h / 2 + dy},
            {cx - w / 2, b.y0 - g - h - dy, cx + w / 2, b.y0 - g - dy},
            {cx - w / 2, b.y1 + g + dy, cx + w / 2, b.y1 + g + h + dy},
        };
        for (size_t i = 0; i < sizeof c / sizeof *c; i++) {
            if (!placer_free_at(p, c[i]))
                continue;
            double score = k * 4 + (double)i * 0.1;
            for (size_t j = 0; j < navoid; j++)
                score += overlap(c[i], avoid[j]) / (w * h) * 6;
            if (score < best_score) {
                best_score = score;
                best = c[i];
            }
        }
        if (best_score < (k + 1) * 4)
            break;
    }
    if (isfinite(best_score)) {
        *out = best;
        return true;
    }
    /* anywhere: a scan of the picture, nearest first (not when the picture
     * is crowded: the scan's cost grows with every label placed) */
    double bestd = INFINITY;
    if (p->n > BEV_MAX_SCANNED_LABELS)
        return false;
    for (double y = p->box.y0; y + h <= p->box.y1; y += h / 2)
        for (double x = p->box.x0; x + w <= p->box.x1; x += w / 4) {
            rect c = {x, y, x + w, y + h};
            double d = hypot(x + w / 2 - cx, y + h / 2 - cy);
            if (d < bestd && placer_free_at(p, c)) {
                bestd = d;
                best = c;
            }
        }
    if (isfinite(bestd)) {
        *out = best;
        return true;
    }
    return false;
}

/* ------------------------------------------------------------ drawing -- */

typedef struct view {
    double u0, v0, scale; /* iso-plane cm -> points */
    double x, y, side;    /* the plot square */
} view;

static double vx(const view *v, double u)
{
    return v->x + (u - v->u0) * v->scale;
}

static double vy(const view *v, double w)
{
    return v->y + v->side - (w - v->v0) * v->scale;
}

/* A closed outline. Vertices closer than a quarter point to the last one
 * drawn are left out (the last vertex always stays): a contour of hundreds
 * of points projected into a few centimetres of page looks the same, and
 * its SVG is a fraction of the size (writing those coordinates was a large
 * share of a batch's time). The distances the reports print never come
 * from the picture. */
static void path_loop(cairo_t *cr, const view *v, const sl_vec2 *p, size_t n)
{
    double lx = 0, ly = 0;
    for (size_t i = 0; i < n; i++) {
        double x = vx(v, p[i].x), y = vy(v, p[i].y);
        if (i == 0) {
            cairo_move_to(cr, x, y);
        } else if (i + 1 == n || (x - lx) * (x - lx) + (y - ly) * (y - ly) >= 0.0625) {
            cairo_line_to(cr, x, y);
        } else {
            continue;
        }
        lx = x;
        ly = y;
    }
    cairo_close_path(cr);
}

/* Where a ring r cm from the outline crosses the ray from c along (dx, dy)
 * (c the middle of the outline's bounds): the bracket [0, reach] of the
 * distance less r, closed by forty bisections. For a convex outline, whose
 * distance is convex along the ray and so crosses r once, the Illinois
 * variant of false position finds the same crossing in a fifth of the
 * evaluations (the bisections were a tenth of drawing a beam's-eye view);
 * it ends where the bracket is below 1e-9 cm or the distance within 1e-12
 * cm of r. Any other outline (an L or a C, two openings, where the middle
 * may lie outside or the ray cross the ring more than once) keeps the
 * bisections (found by an independent review: such rings shrank to their
 * middle). */
static double ring_crossing(const sl_outline *o, bool convex, sl_vec2 c, double dx, double dy,
                            double r, double reach)
{
    double t0 = 0, t1 = reach;
    double f0 = convex ? sl_outline_distance(o, c) - r : NAN;
    double f1 = convex ? sl_outline_distance(o, (sl_vec2){c.x + t1 * dx, c.y + t1 * dy}) - r
                       : NAN;
    if (!(f0 < 0 && f1 >= 0)) {
        for (int it = 0; it < 40; it++) {
            double tm = 0.5 * (t0 + t1);
            if (sl_outline_distance(o, (sl_vec2){c.x + tm * dx, c.y + tm * dy}) < r)
                t0 = tm;
            else
                t1 = tm;
        }
        return t0;
    }
    int side = 0;
    for (int it = 0; it < 100 && t1 - t0 > 1e-9; it++) {
        double t = (t0 * f1 - t1 * f0) / (f1 - f0);
        if (!(t > t0 && t < t1))
            t = 0.5 * (t0 + t1);
        double ft = sl_outline_distance(o, (sl_vec2){c.x + t * dx, c.y + t * dy}) - r;
        if (fabs(ft) < 1e-12)
            return t;
        if (ft < 0) {
            t0 = t;
            f0 = ft;
            if (side == -1)
                f1 *= 0.5;
            side = -1;
        } else {
            t1 = t;
            f1 = ft;
            if (side == 1)
                f0 *= 0.5;
            side = 1;
        }
    }
    return t0;
}

void fig_bev_ring_points(const sl_outline *o, double r, sl_vec2 *p, size_t n)
{
    sl_vec2 lo, hi;
    sl_outline_bounds(o, &lo, &hi);
    sl_vec2 c = {(lo.x + hi.x) / 2, (lo.y + hi.y) / 2};
    double reach = hypot(hi.x - lo.x, hi.y - lo.y) + r + 1;
    bool convex = sl_outline_convex(o);
    for (size_t i = 0; i < n; i++) {
        double a = 2 * M_PI * (double)i / (double)n, dx = cos(a), dy = sin(a);
        double t = ring_crossing(o, convex, c, dx, dy, r, reach);
        p[i] = (sl_vec2){c.x + t * dx, c.y + t * dy};
    }
}

static int status_rank(sl_status_kind s)
{
    switch (s) {
    case SL_ST_EXCEEDS: return 0;
    case SL_ST_MAY_EXCEED: return 1;
    case SL_ST_BAND: return 2;
    case SL_ST_BELOW: return 3;
    case SL_ST_NO_LEVEL: return 4;
    case SL_ST_IN_FIELD: return 5;
    case SL_ST_NOT_ASSESSED: return 6;
    }
    return 7;
}

typedef struct label_job {
    bev_organ *g;
    int rank;
} label_job;

static int cmp_label(const void *a, const void *b)
{
    const label_job *x = a, *y = b;
    if (x->rank != y->rank)
        return x->rank - y->rank;
    return x->g->o < y->g->o ? -1 : x->g->o > y->g->o;
}

static int cmp_area_desc(const void *a, const void *b)
{
    const bev_organ *x = *(bev_organ *const *)a, *y = *(bev_organ *const *)b;
    double ax = (x->hi.x - x->lo.x) * (x->hi.y - x->lo.y);
    double ay = (y->hi.x - y->lo.x) * (y->hi.y - y->lo.y);
    return ax > ay ? -1 : ax < ay;
}

static void label_text(const bev_organ *g, bool with_distance, char *buf, size_t n)
{
    if (with_distance && isfinite(g->dist_cm))
        snprintf(buf, n, "%s %s %.1f cm", fig_status_symbol(g->status), g->roi->name, g->dist_cm);
    else
        snprintf(buf, n, "%s %s", fig_status_symbol(g->status), g->roi->name);
}

/* A label: white backing, the status shape and name in the status colour,
 * then the DICOM colour swatch. */
static void draw_label(cairo_t *cr, rect at, const bev_organ *g, const char *text, fig_font f,
                       double sw)
{
    double rgb[3];
    fig_status_rgb(g->status, rgb);
    cairo_set_source_rgba(cr, 1, 1, 1, 0.85);
    cairo_rectangle(cr, at.x0, at.y0, at.x1 - at.x0, at.y1 - at.y0);
    cairo_fill(cr);
    cairo_set_source_rgb(cr, rgb[0] * 0.8, rgb[1] * 0.8, rgb[2] * 0.8);
    fig_text(cr, at.x0 + 1, (at.y0 + at.y1) / 2, 0, 0.5, text, f, 0);
    if (g->roi->has_color) {
        cairo_set_source_rgb(cr, g->roi->color[0] / 255.0, g->roi->color[1] / 255.0,
                             g->roi->color[2] / 255.0);
        double s = sw, y = (at.y0 + at.y1) / 2 - s / 2;
        cairo_rectangle(cr, at.x1 - s - 1, y, s, s);
        cairo_fill_preserve(cr);
        cairo_set_source_rgb(cr, 0.3, 0.3, 0.3);
        cairo_set_line_width(cr, 0.4);
        cairo_stroke(cr);
    }
}

/* The legend, drawn (or only measured, when draw is false) from (x, y) in
 * width w; returns its height. */
static double legend(cairo_t *cr, bool draw, double x, double y, double w, fig_font f,
                     const sl_beam_place *bp, const bool present[SL_ST_NOT_ASSESSED + 1],
                     double scale, const char *note)
{
    double y0 = y, th, tw, sz = f.size_pt;
    fig_font fb = {f.size_pt, true, false};
    fig_text_size(cr, "Status", fb, w, &tw, &th);
    if (draw) {
        cairo_set_source_rgb(cr, 0.1, 0.1, 0.1);
        fig_text(cr, x, y, 0, 0, "Organs by status", fb, w);
    }
    y += th + 2;
    for (int s = 0; s <= SL_ST_NOT_ASSESSED; s++) {
        if (!present[s])
            continue;
        char buf[200];
        snprintf(buf, sizeof buf, "%s %s", fig_status_symbol((sl_status_kind)s),
                 sl_status_text((sl_status_kind)s));
        double rgb[3];
        fig_status_rgb((sl_status_kind)s, rgb);
        fig_text_size(cr, buf, f, w - sz * 1.4, &tw, &th);
        if (draw) {
            cairo_set_source_rgb(cr, rgb[0] * 0.3 + 0.7, rgb[1] * 0.3 + 0.7, rgb[2] * 0.3 + 0.7);
            cairo_rectangle(cr, x, y + 1, sz, sz);
            cairo_fill_preserve(cr);
            cairo_set_source_rgb(cr, rgb[0], rgb[1], rgb[2]);
            cairo_set_line_width(cr, 1.2);
            cairo_stroke(cr);
            cairo_set_source_rgb(cr, rgb[0] * 0.8, rgb[1] * 0.8, rgb[2] * 0.8);
            fig_text(cr, x + sz * 1.4, y, 0, 0, buf, f, w - sz * 1.4);
        }
        y += th + 2;
    }
    const char *lines[5];
    char fieldl[120], geo[200];
    snprintf(fieldl, sizeof fieldl, "field edge: %s", sl_field_source_name(bp->field.source));
    lines[0] = fieldl;
    lines[1] = bp->field.applicator ? "applicator opening" : NULL;
    lines[2] = "rings 1, 2, 5, 10 cm from the field edge";
    lines[3] = "small square: the ROI's display colour in the structure set";
    const char *pos = sl_position_code(bp->position);
    snprintf(geo, sizeof geo,
             "seen from the source; gantry %.1f\u00B0, collimator %.1f\u00B0, couch %.1f\u00B0, "
             "patient %s",
             bp->beam->gantry_deg, bp->beam->collimator_deg, bp->beam->couch_deg,
             pos ? pos : "-");
    lines[4] = geo;
    y += 3;
    for (int i = 0; i < 5; i++) {
        if (!lines[i])
            continue;
        double ix = i < 3 ? sz * 2.2 : (i == 3 ? sz * 1.4 : 0);
        fig_text_size(cr, lines[i], f, w - ix, &tw, &th);
        if (draw) {
            double my = y + fmin(th, sz * 1.3) / 2;
            cairo_save(cr);
            if (i == 0) {
                cairo_rectangle(cr, x, my - sz / 2, sz * 1.8, sz);
                cairo_set_source_rgba(cr, 0.95, 0.75, 0.15, 0.35);
                cairo_fill_preserve(cr);
                cairo_set_source_rgb(cr, 0.55, 0.42, 0.0);
                cairo_set_line_width(cr, 1.2);
                cairo_stroke(cr);
            } else if (i == 1 || i == 2) {
                double d[2] = {i == 1 ? 4 : 1.5, i == 1 ? 2 : 2};
                cairo_set_dash(cr, d, 2, 0);
                cairo_set_line_width(cr, i == 1 ? 1.0 : 0.8);
                cairo_set_source_rgb(cr, i == 1 ? 0.3 : 0.45, i == 1 ? 0.3 : 0.45,
                                     i == 1 ? 0.3 : 0.45);
                cairo_move_to(cr, x, my);
                cairo_line_to(cr, x + sz * 1.8, my);
                cairo_stroke(cr);
            } else if (i == 3) {
                cairo_set_source_rgb(cr, 0.5, 0.5, 0.5);
                cairo_rectangle(cr, x, my - sz * 0.35, sz * 0.7, sz * 0.7);
                cairo_fill(cr);
            }
            cairo_restore(cr);
            cairo_set_source_rgb(cr, 0.1, 0.1, 0.1);
            fig_text(cr, x + ix, y, 0, 0, lines[i], f, w - ix);
        }
        y += th + 2;
    }
    /* a scale bar: 5 cm at the isocentric plane (shorter if it would not fit) */
    double cm = 5;
    while (cm * scale > w * 0.8 && cm > 1)
        cm = cm > 2 ? 2 : 1;
    y += 3;
    if (draw) {
        cairo_set_source_rgb(cr, 0.1, 0.1, 0.1);
        cairo_set_line_width(cr, 1.2);
        cairo_move_to(cr, x, y);
        cairo_line_to(cr, x, y + 4);
        cairo_line_to(cr, x + cm * scale, y + 4);
        cairo_line_to(cr, x + cm * scale, y);
        cairo_stroke(cr);
        char sb[48];
        snprintf(sb, sizeof sb, "%g cm at the isocentric plane", cm);
        fig_text(cr, x, y + 6, 0, 0, sb, f, w);
    }
    fig_text_size(cr, "5 cm at the isocentric plane", f, w, &tw, &th);
    y += 6 + th + 2;
    if (note && note[0]) {
        fig_text_size(cr, note, f, w, &tw, &th);
        if (draw) {
            cairo_set_source_rgb(cr, 0.1, 0.1, 0.1);
            fig_text(cr, x, y, 0, 0, note, f, w);
        }
        y += th + 2;
    }
    return y - y0;
}

static void draw_bev(cairo_t *cr, double w, double h, const void *vctx)
{
    const fig_bev_ctx *ctx = vctx;
    const sl_estimate_report *r = ctx->r;
    if (!r || !r->loc || ctx->beam >= r->loc->nbeams)
        return;
    const sl_beam_place *bp = &r->loc->beams[ctx->beam];
    const sl_outline *edge = bp->field.edge;
    size_t no = r->loc->norgans;
    double fs = fmin(fmax(fmin(w, h) / 48, 6.5), 9);
    fig_font f = {fs, false, false}, fb = {fs * 1.1, true, false};

    fig_count(cr, "beam", "%d", bp->beam->number);

    /* the organs, projected */
    bev_organ *gs = calloc(no ? no : 1, sizeof *gs);
    bev_organ **order = calloc(no ? no : 1, sizeof *order);
    label_job *jobs = calloc(no ? no : 1, sizeof *jobs);
    if (!gs || !order || !jobs) {
        free(gs);
        free(order);
        free(jobs);
        return;
    }
    bool present[SL_ST_NOT_ASSESSED + 1] = {false};
    for (size_t o = 0; o < no; o++) {
        organ_project(r, bp, o, &gs[o]);
        gs[o].status = o < r->as->n ? r->as->items[o].status : SL_ST_NOT_ASSESSED;
        if (gs[o].any || gs[o].has_at) /* drawn or pointed at: in the legend */
            present[gs[o].status] = true;
    }

    /* the picture: the field and 11.5 cm around it, so the 10 cm ring shows */
    sl_vec2 lo, hi;
    sl_outline_bounds(edge, &lo, &hi);
    double margin = 11.5;
    double u0 = lo.x - margin, u1 = hi.x + margin, v0 = lo.y - margin, v1 = hi.y + margin;
    double span = fmax(u1 - u0, v1 - v0);
    double th, tw;
    char title[200];
    snprintf(title, sizeof title, "Beam %d%s%s%s: beam's-eye view", bp->beam->number,
             bp->beam->name ? " '" : "", bp->beam->name ? bp->beam->name : "",
             bp->beam->name ? "'" : "");
    fig_text_size(cr, title, fb, w, &tw, &th);
    double top = th + 4, dm = fs * 2.2; /* room for the direction letters */
    bool right = w >= 1.25 * h;
    double side, lx, ly, lw;
    if (right) {
        side = fmin(h - top - 2 * dm, w * 0.68 - 2 * dm);
        lx = side + 2 * dm + fs;
        ly = top + dm;
        lw = w - lx - 2;
    } else {
        lw = w - 4;
        double need = legend(cr, false, 0, 0, lw, f, bp, present, 1, NULL);
        side = fmin(w - 2 * dm, h - top - 2 * dm - need - 30);
        lx = 2;
        ly = top + side + 2 * dm;
    }
    side = fmax(side, 40);
    view v = {u0 - (span - (u1 - u0)) / 2, v0 - (span - (v1 - v0)) / 2, side / span, dm, top + dm,
              side};
    if (right) /* centre the square in the height left */
        v.y = top + dm;
    rect box = {v.x, v.y, v.x + side, v.y + side};

    cairo_set_source_rgb(cr, 0.1, 0.1, 0.1);
    fig_text(cr, 0, 0, 0, 0, title, fb, w);

    size_t nshow = 0, nout = 0, nunseen = 0;
    for (size_t o = 0; o < no; o++) {
        bev_organ *g = &gs[o];
        if (!g->any) {
            if (g->has_at)
                g->outside = true; /* nothing of its outline, yet a point to point at */
            else {
                nunseen++;
                continue;
            }
        } else {
            g->outside = g->hi.x < v.u0 || g->lo.x > v.u0 + span || g->hi.y < v.v0 ||
                         g->lo.y > v.v0 + span;
        }
        if (g->outside && !g->has_at) {
            /* outside and no point to point at: use the middle of its bounds */
            g->at = (sl_vec2){(g->lo.x + g->hi.x) / 2, (g->lo.y + g->hi.y) / 2};
            g->has_at = true;
        }
        if (g->outside)
            nout++;
        else
            order[nshow++] = g;
    }
    qsort(order, nshow, sizeof *order, cmp_area_desc);

    /* organs, largest first so that small ones stay visible on top */
    cairo_save(cr);
    cairo_rectangle(cr, box.x0, box.y0, side, side);
    cairo_clip(cr);
    size_t nfaces = 0;
    for (size_t k = 0; k < nshow; k++) {
        bev_organ *g = order[k];
        double rgb[3];
        fig_status_rgb(g->status, rgb);
        if (g->shape.np > 0) {
            cairo_new_path(cr);
            for (size_t i = 0; i < g->shape.np; i++)
                path_loop(cr, &v, g->shape.p + g->shape.start[i],
                          g->shape.start[i + 1] - g->shape.start[i]);
            nfaces += g->shape.np;
            fig_path_thin(cr);
            cairo_set_fill_rule(cr, CAIRO_FILL_RULE_WINDING);
            cairo_set_line_join(cr, CAIRO_LINE_JOIN_ROUND);
            cairo_set_line_width(cr, g->status == SL_ST_EXCEEDS ? 3.6 : 2.4);
            cairo_set_source_rgb(cr, rgb[0], rgb[1], rgb[2]);
            cairo_stroke_preserve(cr);
            cairo_set_source_rgb(cr, 0.75 + 0.25 * rgb[0], 0.75 + 0.25 * rgb[1],
                                 0.75 + 0.25 * rgb[2]);
            cairo_fill(cr);
        }
        if (g->point && g->has_at) {
            double x = vx(&v, g->at.x), y = vy(&v, g->at.y), s = fs * 0.5;
            cairo_set_source_rgb(cr, rgb[0], rgb[1], rgb[2]);
            cairo_set_line_width(cr, 1.6);
            cairo_move_to(cr, x - s, y - s);
            cairo_line_to(cr, x + s, y + s);
            cairo_move_to(cr, x - s, y + s);
            cairo_line_to(cr, x + s, y - s);
            cairo_stroke(cr);
        }
    }
    fig_count(cr, "organs-drawn", "%zu", nshow);
    fig_count(cr, "organ-faces", "%zu", nfaces);

    /* the field over the organs, translucent; the applicator; the rings */
    cairo_new_path(cr);
    for (size_t k = 0; k < sl_outline_loop_count(edge); k++) {
        size_t n;
        const sl_vec2 *p = sl_outline_loop_points(edge, k, &n);
        path_loop(cr, &v, p, n);
    }
    cairo_set_fill_rule(cr, CAIRO_FILL_RULE_EVEN_ODD);
    cairo_set_source_rgba(cr, 0.95, 0.75, 0.15, 0.35);
    cairo_fill_preserve(cr);
    cairo_set_source_rgb(cr, 0.55, 0.42, 0.0);
    cairo_set_line_width(cr, 1.4);
    cairo_stroke(cr);
    if (bp->field.applicator) {
        double d[2] = {5, 2.5};
        cairo_set_dash(cr, d, 2, 0);
        cairo_set_source_rgb(cr, 0.3, 0.3, 0.3);
        cairo_set_line_width(cr, 1.0);
        for (size_t k = 0; k < sl_outline_loop_count(bp->field.applicator); k++) {
            size_t n;
            const sl_vec2 *p = sl_outline_loop_points(bp->field.applicator, k, &n);
            path_loop(cr, &v, p, n);
        }
        cairo_stroke(cr);
        cairo_set_dash(cr, NULL, 0, 0);
    }
    placer pl = {NULL, 0, 0, {box.x0 + 1, box.y0 + 1, box.x1 - 1, box.y1 - 1}};
    const double rings[4] = {1, 2, 5, 10};
    enum { NR = 144 };
    sl_vec2 rp[NR];
    fig_font fr = {fs * 0.85, false, false};
    for (int i = 0; i < 4; i++) {
        fig_bev_ring_points(edge, rings[i], rp, NR);
        double d[2] = {1.5, 2};
        cairo_set_dash(cr, d, 2, 0);
        cairo_set_source_rgb(cr, 0.45, 0.45, 0.45);
        cairo_set_line_width(cr, 0.7);
        cairo_new_path(cr);
        path_loop(cr, &v, rp, NR);
        cairo_stroke(cr);
        cairo_set_dash(cr, NULL, 0, 0);
        /* its label where the ring meets the picture's lower left diagonal,
         * staggered so the four stay apart */
        char lab[16];
        snprintf(lab, sizeof lab, "%g cm", rings[i]);
        fig_text_size(cr, lab, fr, 0, &tw, &th);
        size_t k = (size_t)(NR * (0.60 + 0.035 * i)) % NR;
        double x = vx(&v, rp[k].x), y = vy(&v, rp[k].y);
        rect lr = {x - tw / 2, y - th / 2, x + tw / 2, y + th / 2};
        if (placer_free_at(&pl, lr)) {
            cairo_set_source_rgba(cr, 1, 1, 1, 0.8);
            cairo_rectangle(cr, lr.x0, lr.y0, tw, th);
            cairo_fill(cr);
            cairo_set_source_rgb(cr, 0.3, 0.3, 0.3);
            fig_text(cr, x, y, 0.5, 0.5, lab, fr, 0);
            placer_add(&pl, lr);
        }
    }
    cairo_restore(cr); /* end of the clip */

    /* the patient directions on the four edges */
    char dr[4], dl[4], du[4], dd[4];
    fig_bev_directions(&bp->frame, dr, dl, du, dd);
    fig_font fd = {fs * 1.15, true, false};
    cairo_set_source_rgb(cr, 0.1, 0.1, 0.1);
    fig_text(cr, box.x1 + dm / 2, (box.y0 + box.y1) / 2, 0.5, 0.5, dr, fd, 0);
    fig_text(cr, box.x0 - dm / 2, (box.y0 + box.y1) / 2, 0.5, 0.5, dl, fd, 0);
    fig_text(cr, (box.x0 + box.x1) / 2, box.y0 - dm / 2, 0.5, 0.5, du, fd, 0);
    fig_text(cr, (box.x0 + box.x1) / 2, box.y1 + dm / 2, 0.5, 0.5, dd, fd, 0);
    cairo_set_line_width(cr, 0.8);
    cairo_rectangle(cr, box.x0, box.y0, side, side);
    cairo_stroke(cr);
    fig_count(cr, "directions", "%s,%s,%s,%s", dr, dl, du, dd);

    /* arrows toward organs outside the picture, at its edge */
    double cx = (box.x0 + box.x1) / 2, cy = (box.y0 + box.y1) / 2;
    rect *avoid = calloc(nshow ? nshow : 1, sizeof *avoid);
    size_t nj = 0, narrows = 0, nunlabelled = 0;
    for (size_t o = 0; o < no; o++)
        if ((gs[o].any || gs[o].has_at))
            jobs[nj++] = (label_job){&gs[o], status_rank(gs[o].status)};
    qsort(jobs, nj, sizeof *jobs, cmp_label);
    for (size_t k = 0; k < nshow && avoid; k++) {
        bev_organ *g = order[k];
        avoid[k] = (rect){fmax(vx(&v, g->lo.x), box.x0), fmax(vy(&v, g->hi.y), box.y0),
                          fmin(vx(&v, g->hi.x), box.x1), fmin(vy(&v, g->lo.y), box.y1)};
    }
    double tips[64][2];
    size_t ntips = 0;
    for (size_t k = 0; k < nj; k++) {
        bev_organ *g = jobs[k].g;
        if (!g->outside)
            continue;
        double dx = vx(&v, g->at.x) - cx, dy = vy(&v, g->at.y) - cy, len = hypot(dx, dy);
        if (len <= 0)
            continue;
        dx /= len;
        dy /= len;
        double half = side / 2 - 3;
        double t = fmin(dx != 0 ? half / fabs(dx) : INFINITY, dy != 0 ? half / fabs(dy) : INFINITY);
        double tx = cx + dx * t, ty = cy + dy * t;
        /* arrows that would share a tip are moved along the edge */
        for (int attempt = 0; attempt < 40; attempt++) {
            bool clash = false;
            for (size_t i = 0; i < ntips && !clash; i++)
                clash = hypot(tips[i][0] - tx, tips[i][1] - ty) < fs * 1.2;
            if (!clash)
                break;
            if (fabs(dx) > fabs(dy)) /* on a left or right edge */
                ty = fmin(fmax(ty + (attempt % 2 ? -1 : 1) * fs * 1.5 * (attempt / 2 + 1),
                               box.y0 + 4), box.y1 - 4);
            else
                tx = fmin(fmax(tx + (attempt % 2 ? -1 : 1) * fs * 1.5 * (attempt / 2 + 1),
                               box.x0 + 4), box.x1 - 4);
        }
        if (ntips < 64) {
            tips[ntips][0] = tx;
            tips[ntips][1] = ty;
            ntips++;
        }
        double L = fs * 2.4, hx = tx - dx * L, hy = ty - dy * L;
        double rgb[3];
        fig_status_rgb(g->status, rgb);
        cairo_set_source_rgb(cr, rgb[0], rgb[1], rgb[2]);
        cairo_set_line_width(cr, 1.6);
        cairo_move_to(cr, hx, hy);
        cairo_line_to(cr, tx - dx * fs * 0.6, ty - dy * fs * 0.6);
        cairo_stroke(cr);
        double a = fs * 0.75, px = -dy, py = dx;
        cairo_move_to(cr, tx, ty);
        cairo_line_to(cr, tx - dx * a + px * a * 0.5, ty - dy * a + py * a * 0.5);
        cairo_line_to(cr, tx - dx * a - px * a * 0.5, ty - dy * a - py * a * 0.5);
        cairo_close_path(cr);
        cairo_fill(cr);
        rect ar = {fmin(hx, tx) - 1, fmin(hy, ty) - 1, fmax(hx, tx) + 1, fmax(hy, ty) + 1};
        placer_add(&pl, ar);
        narrows++;
        char text[200];
        label_text(g, true, text, sizeof text);
        fig_text_size(cr, text, f, 0, &tw, &th);
        double sw = g->roi->has_color ? fs * 0.7 + 2 : 0;
        rect lr;
        rect tail = {hx - 1, hy - 1, hx + 1, hy + 1};
        if (place_label(&pl, tail, tw + 2 + sw, th, avoid, nshow, &lr)) {
            double lcx = fmin(fmax(hx, lr.x0), lr.x1), lcy = fmin(fmax(hy, lr.y0), lr.y1);
            if (hypot(lcx - hx, lcy - hy) > fs * 1.2) { /* moved away: a leader to its arrow */
                cairo_set_line_width(cr, 0.6);
                cairo_move_to(cr, lcx, lcy);
                cairo_line_to(cr, hx, hy);
                cairo_stroke(cr);
            }
            draw_label(cr, lr, g, text, f, fs * 0.7);
            placer_add(&pl, lr);
        } else {
            nunlabelled++;
        }
    }
    fig_count(cr, "arrows", "%zu", narrows);

    /* labels of the organs in the picture, most urgent first */
    size_t nlabels = 0;
    for (size_t k = 0; k < nj; k++) {
        bev_organ *g = jobs[k].g;
        if (g->outside)
            continue;
        char text[200];
        label_text(g, false, text, sizeof text);
        fig_text_size(cr, text, f, 0, &tw, &th);
        double sw = g->roi->has_color ? fs * 0.7 + 2 : 0;
        rect b;
        if (g->any)
            b = (rect){fmax(vx(&v, g->lo.x), box.x0), fmax(vy(&v, g->hi.y), box.y0),
                       fmin(vx(&v, g->hi.x), box.x1), fmin(vy(&v, g->lo.y), box.y1)};
        else
            b = (rect){vx(&v, g->at.x) - 2, vy(&v, g->at.y) - 2, vx(&v, g->at.x) + 2,
                       vy(&v, g->at.y) + 2};
        rect lr;
        size_t self = nshow;
        for (size_t i = 0; i < nshow; i++)
            if (order[i] == g)
                self = i;
        rect saved = {0};
        if (self < nshow && avoid) { /* its own shape is no obstacle */
            saved = avoid[self];
            avoid[self] = (rect){0, 0, 0, 0};
        }
        bool ok = place_label(&pl, b, tw + 2 + sw, th, avoid, nshow, &lr);
        if (self < nshow && avoid)
            avoid[self] = saved;
        if (!ok) {
            nunlabelled++;
            continue;
        }
        /* a leader line when the label had to move away from its organ */
        double lcx = fmin(fmax((b.x0 + b.x1) / 2, lr.x0), lr.x1),
               lcy = fmin(fmax((b.y0 + b.y1) / 2, lr.y0), lr.y1);
        double ocx = fmin(fmax(lcx, b.x0), b.x1), ocy = fmin(fmax(lcy, b.y0), b.y1);
        if (hypot(lcx - ocx, lcy - ocy) > fs * 1.2) {
            double rgb[3];
            fig_status_rgb(g->status, rgb);
            cairo_set_source_rgb(cr, rgb[0], rgb[1], rgb[2]);
            cairo_set_line_width(cr, 0.6);
            cairo_move_to(cr, lcx, lcy);
            cairo_line_to(cr, (b.x0 + b.x1) / 2, (b.y0 + b.y1) / 2);
            cairo_stroke(cr);
        }
        draw_label(cr, lr, g, text, f, fs * 0.7);
        placer_add(&pl, lr);
        nlabels++;
    }
    fig_count(cr, "labels", "%zu", nlabels);
    fig_count(cr, "unlabelled", "%zu", nunlabelled);

    /* what the picture cannot show */
    char note[1200] = "";
    size_t len = 0;
    if (nunseen)
        len += (size_t)snprintf(note, sizeof note,
                                "%zu organ%s not drawn: nothing of %s lies in front of the "
                                "source. ",
                                nunseen, nunseen == 1 ? "" : "s", nunseen == 1 ? "it" : "them");
    if (nunlabelled && len < sizeof note)
        len += (size_t)snprintf(note + len, sizeof note - len,
                                "%zu organ%s left unlabelled for want of room "
                                "(see the tables). ",
                                nunlabelled, nunlabelled == 1 ? "" : "s");
    for (size_t o = no; o < r->est->norgans && len < sizeof note; o++) {
        const sl_organ_dose *d = &r->est->organs[o];
        if (d->landmark)
            len += (size_t)snprintf(note + len, sizeof note - len,
                                    "%s: %.1f cm from the field edge, measured on the patient "
                                    "(not in the images). ",
                                    d->roi->name, d->min_distance_cm);
    }
    legend(cr, true, lx, ly, lw, f, bp, present, v.scale, note);
    for (size_t o = 0; o < no; o++)
        polys_free(&gs[o].shape);
    free(avoid);
    free(pl.r);
    free(gs);
    free(order);
    free(jobs);
}

/* The public entry (fig_boxed: the caller's page is left as it was). */
void fig_bev(cairo_t *cr, double w, double h, const void *ctx)
{
    fig_boxed(cr, w, h, draw_bev, ctx);
}
