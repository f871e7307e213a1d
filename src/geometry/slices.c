/*
 * Stacks of axial slabs from closed planar contours (see slices.h).
 */
#include "strayline/slices.h"
#include "strayline/poly2d.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

#define MM 0.1
#define PLANE_TOL_CM 0.005  /* z spread allowed within one contour */
#define SAME_PLANE_CM 0.001 /* contours closer than this in z share a slice */

typedef struct zref {
    double z;
    size_t contour;
} zref;

static int cmp_zref(const void *a, const void *b)
{
    double za = ((const zref *)a)->z, zb = ((const zref *)b)->z;
    if (za < zb)
        return -1;
    if (za > zb)
        return 1;
    size_t ca = ((const zref *)a)->contour, cb = ((const zref *)b)->contour;
    return ca < cb ? -1 : ca > cb;
}

static int cmp_double(const void *a, const void *b)
{
    double x = *(const double *)a, y = *(const double *)b;
    return x < y ? -1 : x > y;
}

void sl_slices_free(sl_slice_stack *s)
{
    if (!s)
        return;
    for (size_t i = 0; i < s->nloops; i++)
        free(s->loops[i]);
    free(s->loops);
    free(s->loop_n);
    free(s->slices);
    memset(s, 0, sizeof *s);
}

static bool closed(sl_contour_type t)
{
    return t == SL_CONTOUR_CLOSED_PLANAR || t == SL_CONTOUR_CLOSEDPLANAR_XOR;
}

sl_status sl_slices_build(const sl_roi *roi, const char *file, double default_thickness_cm,
                          sl_slice_stack *out, sl_error *err)
{
    memset(out, 0, sizeof *out);
    zref *refs = malloc((roi->ncontours ? roi->ncontours : 1) * sizeof *refs);
    if (!refs)
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    size_t nref = 0, flat_contour = 0;
    double flat_z = 0;
    for (size_t i = 0; i < roi->ncontours; i++) {
        const sl_contour *c = &roi->contours[i];
        if (c->type == SL_CONTOUR_POINT) {
            out->ignored_points++;
            continue;
        }
        if (!closed(c->type)) {
            out->ignored_open++;
            continue;
        }
        double zmin = INFINITY, zmax = -INFINITY;
        for (size_t k = 0; k < c->npoints; k++) {
            zmin = fmin(zmin, c->points[k].z);
            zmax = fmax(zmax, c->points[k].z);
        }
        if ((zmax - zmin) * MM > PLANE_TOL_CM) {
            free(refs);
            return sl_error_set(err, SL_EINPUT,
                                "%s: ROI '%s': contour %zu is not in an axial plane (z varies by "
                                "%.3f cm): strayline handles axial contours only",
                                file, roi->name, i + 1, (zmax - zmin) * MM);
        }
        refs[nref++] = (zref){0.5 * (zmin + zmax) * MM, i};
    }
    if (nref == 0) {
        free(refs);
        return SL_OK;
    }
    qsort(refs, nref, sizeof *refs, cmp_zref);

    out->loops = calloc(nref, sizeof *out->loops);
    out->loop_n = calloc(nref, sizeof *out->loop_n);
    out->slices = calloc(nref, sizeof *out->slices);
    if (!out->loops || !out->loop_n || !out->slices) {
        free(refs);
        sl_slices_free(out);
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    }
    for (size_t r = 0; r < nref; r++) {
        const sl_contour *c = &roi->contours[refs[r].contour];
        sl_vec2 *p = malloc(c->npoints * sizeof *p);
        if (!p) {
            free(refs);
            sl_slices_free(out);
            return sl_error_set(err, SL_ENOMEM, "out of memory");
        }
        size_t n = 0;
        for (size_t k = 0; k < c->npoints; k++) {
            sl_vec2 v = {c->points[k].x * MM, c->points[k].y * MM};
            if (n > 0 && v.x == p[n - 1].x && v.y == p[n - 1].y) {
                out->repeated_points++;
                continue;
            }
            p[n++] = v;
        }
        while (n > 1 && p[0].x == p[n - 1].x && p[0].y == p[n - 1].y) {
            n--;
            out->repeated_points++;
        }
        if (n < 3) {
            free(p);
            out->ignored_small++;
            continue;
        }
        /* A closed contour that encloses nothing (collinear points, a wire
         * drawn as a loop) has no volume to sample and no inside for the
         * body's depths; its dose would be 0/0. */
        if (!(fabs(sl_p2_area(p, n)) > 1e-8)) {
            if (out->ignored_flat++ == 0) {
                flat_contour = refs[r].contour;
                flat_z = refs[r].z;
            }
            free(p);
            continue;
        }
        double z = refs[r].z;
        if (out->nslices == 0 || z - out->slices[out->nslices - 1].z_cm > SAME_PLANE_CM) {
            out->slices[out->nslices++] = (sl_slice){z, 0, 0, out->nloops, 0};
        }
        out->loops[out->nloops] = p;
        out->loop_n[out->nloops] = n;
        out->nloops++;
        out->slices[out->nslices - 1].count++;
    }
    free(refs);
    if (out->nloops == 0 && out->ignored_flat) {
        sl_slices_free(out);
        return sl_error_set(err, SL_EINPUT,
                            "%s: ROI '%s': contour %zu (z = %.2f cm) is closed but encloses no "
                            "area (collinear points, or a figure eight whose halves cancel), and "
                            "so does every other closed contour of it: redraw it, or mark it "
                            "OPEN_PLANAR or POINT",
                            file, roi->name, flat_contour + 1, flat_z);
    }
    for (size_t i = 0; i < out->nslices; i++) {
        sl_slice *s = &out->slices[i];
        double below = i > 0 ? s->z_cm - out->slices[i - 1].z_cm : NAN;
        double above = i + 1 < out->nslices ? out->slices[i + 1].z_cm - s->z_cm : NAN;
        if (isnan(below))
            below = isnan(above) ? default_thickness_cm : above;
        if (isnan(above))
            above = below;
        s->z_lo_cm = s->z_cm - 0.5 * below;
        s->z_hi_cm = s->z_cm + 0.5 * above;
    }
    return SL_OK;
}

double sl_slices_typical_spacing(const sl_structure_set *ss, double fallback)
{
    size_t cap = 0, n = 0;
    double *gaps = NULL;
    for (size_t r = 0; r < ss->nrois; r++) {
        const sl_roi *roi = &ss->rois[r];
        double last = NAN;
        /* contours are usually stored slice by slice; gaps between distinct
         * consecutive planes are enough for a median */
        for (size_t i = 0; i < roi->ncontours; i++) {
            const sl_contour *c = &roi->contours[i];
            if (!closed(c->type) || c->npoints == 0)
                continue;
            double z = c->points[0].z * MM;
            if (!isnan(last) && fabs(z - last) > SAME_PLANE_CM) {
                if (n == cap) {
                    cap = cap ? 2 * cap : 256;
                    double *g = realloc(gaps, cap * sizeof *g);
                    if (!g) {
                        free(gaps);
                        return fallback;
                    }
                    gaps = g;
                }
                gaps[n++] = fabs(z - last);
            }
            last = z;
        }
    }
    if (n == 0) {
        free(gaps);
        return fallback;
    }
    qsort(gaps, n, sizeof *gaps, cmp_double);
    double m = gaps[n / 2];
    free(gaps);
    return m;
}
