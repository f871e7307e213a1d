/*
 * Organ sampling by scanline filling (see include/strayline/sampling.h).
 *
 * The lattice is anchored at the origin of patient coordinates, (i + 0.5)
 * times the pitch, so the same ROI always gives the same samples whatever
 * else is in the structure set.
 */
#include "strayline/sampling.h"
#include "strayline/poly2d.h"
#include "strayline/slices.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

#define MAX_SAMPLES 400000 /* per organ; the pitch grows rather than memory */
/* Every closed contour gives at least one sample however coarse the pitch,
 * so the number of contours must stay well under the sample cap for the
 * coarsening below to end. Clinical ROIs have hundreds of contours. */
#define MAX_LOOPS 100000
#define MAX_COARSENINGS 40
/* Rows of the lattice across a ROI's extent at most: a self-crossing or
 * XOR contour can have a tiny net area and a huge extent, and the first
 * pitch comes from the area. Organs span tens to a few hundred rows. */
#define MAX_ROWS 4096

void sl_sampling_default_options(sl_sampling_options *o)
{
    o->target_samples = 4000;
    o->min_pitch_cm = 0.02;
    o->max_pitch_cm = 0.5;
    o->default_thickness_cm = 0.3;
}

void sl_organ_samples_free(sl_organ_samples *s)
{
    if (!s)
        return;
    free(s->points);
    free(s->volume_cc);
    free(s->outline_loop_first);
    sl_notes_free(&s->notes);
    memset(s, 0, sizeof *s);
}

static int cmp_double(const void *a, const void *b)
{
    double x = *(const double *)a, y = *(const double *)b;
    return x < y ? -1 : x > y;
}

typedef struct growing {
    sl_organ_samples *s;
    size_t cap;
    size_t limit;  /* samples allowed (0: no limit) */
    bool failed;   /* out of memory */
    bool overflow; /* the limit was reached */
} growing;

static void push(growing *g, sl_vec3 p, double v)
{
    if (g->failed || g->overflow)
        return;
    if (g->limit && g->s->n >= g->limit) {
        g->overflow = true;
        return;
    }
    if (g->s->n == g->cap) {
        size_t cap = g->cap ? g->cap * 2 : 1024;
        sl_vec3 *np = realloc(g->s->points, cap * sizeof *np);
        if (!np) {
            g->failed = true;
            return;
        }
        g->s->points = np;
        double *nv = realloc(g->s->volume_cc, cap * sizeof *nv);
        if (!nv) {
            g->failed = true;
            return;
        }
        g->s->volume_cc = nv;
        g->cap = cap;
    }
    g->s->points[g->s->n] = p;
    g->s->volume_cc[g->s->n] = v;
    g->s->n++;
    g->s->volume_cc_total += v;
}

static sl_status sample_points(const sl_roi *roi, sl_organ_samples *out, growing *g)
{
    for (size_t i = 0; i < roi->ncontours; i++) {
        const sl_contour *c = &roi->contours[i];
        if (c->type != SL_CONTOUR_POINT)
            continue;
        for (size_t k = 0; k < c->npoints; k++)
            push(g, (sl_vec3){c->points[k].x * 0.1, c->points[k].y * 0.1, c->points[k].z * 0.1},
                 0.0);
    }
    out->is_point = out->n > 0;
    return g->failed ? SL_ENOMEM : SL_OK;
}

/* The lattice rows integrate the area by the midpoint rule, which is off by
 * up to a row pitch at an edge parallel to the rows (a box). For loops that
 * nest without crossing, the even-odd area is exact from the shoelace
 * formula: the sum of the loops' areas, holes (odd nesting depth) negative.
 * The slice's samples are scaled to it. A factor far from 1 means crossing
 * loops, where the formula does not hold: the scanline volumes stay. */
static void rescale_to_exact_area(const sl_slice_stack *st, const sl_slice *sl, growing *g,
                                  size_t first_sample, double thick)
{
    double exact = 0;
    for (size_t k = 0; k < sl->count; k++) {
        const sl_vec2 *p = st->loops[sl->first + k];
        size_t n = st->loop_n[sl->first + k];
        int depth = 0;
        for (size_t m = 0; m < sl->count; m++) {
            if (m != k && sl_p2_inside(p[0], st->loops[sl->first + m], st->loop_n[sl->first + m]))
                depth++;
        }
        exact += (depth % 2 ? -1.0 : 1.0) * fabs(sl_p2_area(p, n));
    }
    exact *= thick;
    double sampled = 0;
    for (size_t i = first_sample; i < g->s->n; i++)
        sampled += g->s->volume_cc[i];
    if (!(sampled > 0) || !(exact > 0))
        return;
    double f = exact / sampled;
    if (f < 0.8 || f > 1.25)
        return;
    for (size_t i = first_sample; i < g->s->n; i++)
        g->s->volume_cc[i] *= f;
    g->s->volume_cc_total += exact - sampled;
}

static void fill_slice(const sl_slice_stack *st, const sl_slice *sl, double h, growing *g,
                       double **xs, size_t *xcap)
{
    size_t first_sample = g->s->n;
    double thick = sl->z_hi_cm - sl->z_lo_cm;
    int nsub = (int)lround(thick / h);
    nsub = nsub < 1 ? 1 : nsub > 32 ? 32 : nsub;
    double dz = thick / nsub;
    double ylo = INFINITY, yhi = -INFINITY;
    size_t ne = 0;
    for (size_t k = 0; k < sl->count; k++) {
        const sl_vec2 *p = st->loops[sl->first + k];
        for (size_t i = 0; i < st->loop_n[sl->first + k]; i++) {
            ylo = fmin(ylo, p[i].y);
            yhi = fmax(yhi, p[i].y);
        }
        ne += st->loop_n[sl->first + k];
    }
    if (ne > *xcap) {
        double *n = realloc(*xs, ne * sizeof *n);
        if (!n) {
            g->failed = true;
            return;
        }
        *xs = n;
        *xcap = ne;
    }
    bool any_row = false;
    long j0 = (long)ceil(ylo / h - 0.5), j1 = (long)floor(yhi / h - 0.5);
    for (long j = j0; j <= j1; j++) {
        double y = (j + 0.5) * h;
        size_t nx = 0;
        for (size_t k = 0; k < sl->count; k++) {
            const sl_vec2 *p = st->loops[sl->first + k];
            size_t n = st->loop_n[sl->first + k];
            for (size_t i = 0, m = n - 1; i < n; m = i++) {
                if ((p[i].y > y) != (p[m].y > y))
                    (*xs)[nx++] = p[i].x + (y - p[i].y) * (p[m].x - p[i].x) / (p[m].y - p[i].y);
            }
        }
        if (nx < 2)
            continue;
        qsort(*xs, nx, sizeof **xs, cmp_double);
        for (size_t s = 0; s + 1 < nx; s += 2) {
            double xa = (*xs)[s], xb = (*xs)[s + 1], len = xb - xa;
            if (!(len > 0))
                continue;
            any_row = true;
            long i0 = (long)ceil(xa / h - 0.5), i1 = (long)ceil(xb / h - 0.5) - 1;
            long m = i1 >= i0 ? i1 - i0 + 1 : 0;
            double v = len * h * dz / (double)(m ? m : 1);
            for (int sub = 0; sub < nsub; sub++) {
                double z = sl->z_lo_cm + (sub + 0.5) * dz;
                if (m == 0) {
                    push(g, (sl_vec3){0.5 * (xa + xb), y, z}, v);
                    continue;
                }
                for (long i = i0; i <= i1; i++)
                    push(g, (sl_vec3){(i + 0.5) * h, y, z}, v);
            }
        }
    }
    if (any_row) {
        rescale_to_exact_area(st, sl, g, first_sample, thick);
        return;
    }
    /* a contour thinner than the pitch: one sample at each loop's centroid */
    for (size_t k = 0; k < sl->count; k++) {
        const sl_vec2 *p = st->loops[sl->first + k];
        size_t n = st->loop_n[sl->first + k];
        double a = sl_p2_area(p, n), cx = 0, cy = 0;
        for (size_t i = 0, m = n - 1; i < n; m = i++) {
            double w = p[m].x * p[i].y - p[i].x * p[m].y;
            cx += (p[m].x + p[i].x) * w;
            cy += (p[m].y + p[i].y) * w;
        }
        if (fabs(a) > 0) {
            cx /= 6 * a;
            cy /= 6 * a;
        } else {
            cx = p[0].x;
            cy = p[0].y;
        }
        push(g, (sl_vec3){cx, cy, sl->z_cm}, fabs(a) * thick);
    }
}

/* Consecutive contour vertices one outline chord may replace at most, so
 * that thinning a contour of a million vertices stays linear. */
#define OUTLINE_RUN 64

static bool run_is_straight(const sl_vec2 *p, size_t n, size_t a, size_t e, double tol)
{
    sl_vec2 pa = p[a % n], pe = p[e % n];
    for (size_t k = a + 1; k < e; k++)
        if (sl_p2_seg_dist2(p[k % n], pa, pe, NULL) > tol * tol)
            return false;
    return true;
}

/* One closed loop's outline samples: every vertex where the outline bends by
 * more than `tol` from the chord of the kept run, so that the chords between
 * kept points never stray more than `tol` from the outline, and edges longer
 * than `spacing` cut into equal pieces. Points lie on the contour itself. */
static void outline_loop(const sl_vec2 *p, size_t n, double z, double spacing, double tol,
                         growing *g)
{
    push(g, (sl_vec3){p[0].x, p[0].y, z}, 0.0);
    size_t a = 0;
    while (a < n) {
        sl_vec2 pa = p[a], pb = p[(a + 1) % n];
        double arc = hypot(pb.x - pa.x, pb.y - pa.y);
        if (arc > spacing) {
            size_t m = (size_t)ceil(arc / spacing);
            for (size_t i = 1; i < m; i++) {
                double t = (double)i / (double)m;
                push(g, (sl_vec3){pa.x + t * (pb.x - pa.x), pa.y + t * (pb.y - pa.y), z}, 0.0);
            }
            if (a + 1 < n)
                push(g, (sl_vec3){pb.x, pb.y, z}, 0.0);
            a++;
            continue;
        }
        size_t e = a + 1;
        while (e + 1 <= n && e + 1 - a <= OUTLINE_RUN) {
            sl_vec2 q0 = p[e % n], q1 = p[(e + 1) % n];
            double more = arc + hypot(q1.x - q0.x, q1.y - q0.y);
            if (more > spacing || !run_is_straight(p, n, a, e + 1, tol))
                break;
            arc = more;
            e++;
        }
        if (e < n)
            push(g, (sl_vec3){p[e].x, p[e].y, z}, 0.0);
        a = e;
    }
}

/* Append the outline samples of every closed loop (see sampling.h). A ROI
 * whose outline would pass the sample cap gets a coarser spacing, noted. */
static sl_status sample_outline(const sl_roi *roi, const sl_slice_stack *st, double pitch,
                                sl_organ_samples *out, growing *g)
{
    size_t base = out->n;
    double vol = out->volume_cc_total;
    out->outline_loop_first = malloc((st->nloops + 1) * sizeof *out->outline_loop_first);
    if (!out->outline_loop_first)
        return SL_ENOMEM;
    double spacing = pitch;
    for (int round = 0;; round++) {
        g->limit = base + MAX_SAMPLES;
        size_t k = 0;
        for (size_t i = 0; i < st->nslices && !g->failed && !g->overflow; i++) {
            const sl_slice *sl = &st->slices[i];
            for (size_t j = 0; j < sl->count && !g->overflow; j++) {
                out->outline_loop_first[k++] = out->n - base;
                outline_loop(st->loops[sl->first + j], st->loop_n[sl->first + j], sl->z_cm,
                             spacing, SL_OUTLINE_TOL_CM * (round + 1), g);
            }
        }
        if (g->failed)
            return SL_ENOMEM;
        if (!g->overflow) {
            out->outline_loop_first[k] = out->n - base;
            out->noutline_loops = k;
            break;
        }
        if (round == MAX_COARSENINGS)
            return SL_EINPUT;
        out->n = base;
        out->volume_cc_total = vol;
        g->overflow = false;
        spacing *= 2;
    }
    out->n_outline = out->n - base;
    if (spacing > pitch)
        sl_notes_add(&out->notes,
                     "ROI '%s': its outline is sampled every %.2f cm at most (coarser than the "
                     "lattice) to stay within %d outline samples",
                     roi->name, spacing, MAX_SAMPLES);
    return SL_OK;
}

sl_status sl_sample_roi(const sl_roi *roi, const char *file, const sl_sampling_options *opt,
                        sl_organ_samples *out, sl_error *err)
{
    memset(out, 0, sizeof *out);
    growing g = {out, 0, 0, false, false};
    sl_slice_stack st;
    sl_status rc = sl_slices_build(roi, file, opt->default_thickness_cm, &st, err);
    if (rc != SL_OK)
        return rc;
    if (st.ignored_open)
        sl_notes_add(&out->notes, "ROI '%s': %zu open contours ignored (only closed contours and "
                                  "points are sampled)",
                     roi->name, st.ignored_open);
    if (st.ignored_small)
        sl_notes_add(&out->notes,
                     "ROI '%s': %zu contours with fewer than 3 distinct points ignored",
                     roi->name, st.ignored_small);
    if (st.repeated_points)
        sl_notes_add(&out->notes, "ROI '%s': %zu repeated contour points removed", roi->name,
                     st.repeated_points);
    if (st.ignored_flat)
        sl_notes_add(&out->notes,
                     "ROI '%s': %zu closed contours that enclose no area ignored", roi->name,
                     st.ignored_flat);
    if (st.nloops > MAX_LOOPS) {
        size_t n = st.nloops;
        sl_slices_free(&st);
        sl_organ_samples_free(out);
        return sl_error_set(err, SL_EINPUT,
                            "%s: ROI '%s' has %zu closed contours (at most %d are sampled): "
                            "not a plausible organ",
                            file, roi->name, n, MAX_LOOPS);
    }
    if (st.nslices == 0) {
        sl_slices_free(&st);
        g.limit = MAX_SAMPLES;
        rc = sample_points(roi, out, &g);
        if (rc == SL_OK && g.overflow) {
            sl_organ_samples_free(out);
            return sl_error_set(err, SL_EINPUT,
                                "%s: ROI '%s' has more than %d points: not a plausible point ROI",
                                file, roi->name, MAX_SAMPLES);
        }
        if (rc != SL_OK) {
            sl_organ_samples_free(out);
            return sl_error_set(err, rc, "out of memory sampling ROI '%s'", roi->name);
        }
        if (out->n == 0)
            sl_notes_add(&out->notes, "ROI '%s' has no closed contour and no point: not sampled",
                         roi->name);
        return SL_OK;
    }
    if (st.ignored_points)
        sl_notes_add(&out->notes,
                     "ROI '%s' has closed contours and points: its %zu points are ignored",
                     roi->name, st.ignored_points);

    double v_est = 0;
    for (size_t i = 0; i < st.nslices; i++) {
        const sl_slice *s = &st.slices[i];
        for (size_t k = 0; k < s->count; k++)
            v_est += fabs(sl_p2_area(st.loops[s->first + k], st.loop_n[s->first + k])) *
                     (s->z_hi_cm - s->z_lo_cm);
    }
    double h = cbrt(v_est / (double)(opt->target_samples ? opt->target_samples : 1));
    h = fmax(opt->min_pitch_cm, fmin(opt->max_pitch_cm, h));
    double ylo = INFINITY, yhi = -INFINITY;
    for (size_t k = 0; k < st.nloops; k++)
        for (size_t i = 0; i < st.loop_n[k]; i++) {
            ylo = fmin(ylo, st.loops[k][i].y);
            yhi = fmax(yhi, st.loops[k][i].y);
        }
    bool wide = (yhi - ylo) / h > MAX_ROWS;
    if (wide)
        h = (yhi - ylo) / MAX_ROWS;
    /* The shoelace areas understate what a self-crossing contour fills, so
     * the sample count is also capped as the lattice is filled: past the cap
     * the organ is sampled again at a coarser pitch. Memory stays bounded. */
    double *xs = NULL;
    size_t xcap = 0;
    bool coarsened = false;
    for (int round = 0;; round++) {
        if (round == MAX_COARSENINGS) {
            free(xs);
            sl_slices_free(&st);
            sl_organ_samples_free(out);
            return sl_error_set(err, SL_EINPUT,
                                "%s: ROI '%s' cannot be sampled within %d samples at any pitch",
                                file, roi->name, MAX_SAMPLES);
        }
        g.limit = MAX_SAMPLES;
        for (size_t i = 0; i < st.nslices && !g.failed && !g.overflow; i++)
            fill_slice(&st, &st.slices[i], h, &g, &xs, &xcap);
        if (!g.overflow)
            break;
        out->n = 0;
        out->volume_cc_total = 0;
        g.overflow = false;
        h *= 1.5;
        coarsened = true;
    }
    free(xs);
    if (coarsened || wide)
        sl_notes_add(&out->notes,
                     "ROI '%s' is very large or its contours cross themselves: sampled at a "
                     "%.2f cm pitch to stay within %d samples",
                     roi->name, h, MAX_SAMPLES);
    out->pitch_cm = h;
    out->nslices = st.nslices;
    if (!g.failed) {
        rc = sample_outline(roi, &st, h, out, &g);
        if (rc == SL_EINPUT) {
            sl_slices_free(&st);
            sl_organ_samples_free(out);
            return sl_error_set(err, SL_EINPUT,
                                "%s: ROI '%s': its outline cannot be sampled within %d samples",
                                file, roi->name, MAX_SAMPLES);
        }
    }
    sl_slices_free(&st);
    if (g.failed || rc != SL_OK) {
        sl_organ_samples_free(out);
        return sl_error_set(err, SL_ENOMEM, "out of memory sampling ROI '%s'", roi->name);
    }
    /* the arrays grew by doubling: give back what the samples do not use
     * (a quarter of their memory on average), so that the stages after
     * take it instead of new memory, which is dear on a virtual machine */
    if (out->n && out->n < g.cap) {
        sl_vec3 *np = realloc(out->points, out->n * sizeof *np);
        if (np)
            out->points = np;
        double *nv = realloc(out->volume_cc, out->n * sizeof *nv);
        if (nv)
            out->volume_cc = nv;
    }
    return SL_OK;
}
