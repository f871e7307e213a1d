/*
 * The estimate on a dose grid over the body (see sl_estimate_grid in
 * include/strayline/dose.h), for an RT Dose that a DICOM viewer shows over
 * the CT. Each voxel is placed as an organ sample is (locate.c: the signed
 * distance in the plane through it, the in-body path from the source, the
 * beam's bolus included: sl_location_depth) and
 * given the model's percent of each beam's reference dose, summed over the
 * fraction groups; the zone of the planning system's dose, when given, is
 * the estimate's (dose.c), and outside the fields it holds the higher of
 * the grid's dose and the model's, as an organ's dose does.
 */
#include "strayline/dose.h"
#include "strayline/parallel.h"
#include "strayline/slices.h"
#include "strayline/surface.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

void sl_dose_grid_free(sl_dose_grid *g)
{
    if (!g)
        return;
    free(g->gy);
    free(g);
}

typedef struct grid_job {
    const sl_estimate *e;
    const sl_body *body;
    sl_dose_grid *g;
    size_t *in_field, *tps; /* per slice */
} grid_job;

static void grid_slice(size_t k, void *ctx)
{
    grid_job *j = ctx;
    const sl_estimate *e = j->e;
    sl_dose_grid *g = j->g;
    for (size_t jy = 0; jy < g->ny; jy++) {
        for (size_t i = 0; i < g->nx; i++) {
            sl_vec3 p = {(g->x0_mm + (double)i * g->step_mm) / 10,
                         (g->y0_mm + (double)jy * g->step_mm) / 10,
                         (g->z0_mm + (double)k * g->step_mm) / 10};
            float *out = &g->gy[(k * g->ny + jy) * g->nx + i];
            *out = 0;
            if (!sl_body_contains(j->body, p))
                continue;
            double dmin = INFINITY, course = 0, far = 0;
            bool placed = true;
            for (size_t b = 0; b < e->nbeams && placed; b++) {
                const sl_beam_dose *bd = &e->beams[b];
                const sl_beam_place *bp = bd->place;
                sl_vec3 q = sl_frame_to_bld(&bp->frame, p);
                sl_vec2 uv;
                double scale;
                if (!sl_frame_project(&bp->frame, q, &uv, &scale)) {
                    placed = false;
                    break;
                }
                double dist = scale * sl_field_distance(&bp->field, uv);
                dmin = fmin(dmin, dist);
                if (dist < SL_IN_FIELD_MARGIN_CM)
                    continue; /* the model says nothing inside a field */
                double ax = fabs(q.x), ay = fabs(q.y);
                sl_eval_query qq = {
                    sl_location_depth(e->loc, bp, p),
                    dist,
                    bp->field.applicator ? scale * sl_outline_distance(bp->field.applicator, uv)
                                         : NAN,
                    ax + ay > 0 ? atan2(ay, ax) * 180 / M_PI : 0, e->opt.mode, 1.0,
                    sl_beam_tilt_toward(bp, q.x, q.y), bd->ssd_used_cm};
                /* the grid holds doses only: the model's percent without its
                 * uncertainty components (sl_beam_eval's extra bound is one) */
                double pc = sl_curves_eval_percent(bd->curves, &qq);
                double cb = 0;
                for (size_t gr = 0; gr < e->ngroups; gr++)
                    if (isfinite(bd->ref_cgy[gr]))
                        cb += e->fractions[gr] * bd->ref_cgy[gr] / 100 * pc;
                course += cb;
                /* a field whose edge lies beyond the zone: added to the
                 * planning system's dose, as for an organ (dose.c) */
                if (dist >= e->tps_zone_cm)
                    far += cb;
            }
            if (!placed)
                continue;
            /* a grid reading low at a reference point is not used in the
             * fields (dose.c, check_tps) */
            if (e->tps_used && dmin < e->tps_zone_cm &&
                !(e->tps_low && dmin < SL_IN_FIELD_MARGIN_CM)) {
                double sum = 0;
                for (size_t f = 0; f < e->opt.ntps && !isnan(sum); f++)
                    sum += sl_rtdose_at(e->opt.tps[f], p.x * 10, p.y * 10, p.z * 10);
                sum += far / 100; /* cGy to Gy */
                /* outside the fields the higher of the two, as for an
                 * organ (dose.c): a grid cropped or cut at a threshold
                 * reads 0 there, and the file must not show less than the
                 * report (found by an independent review) */
                if (!isnan(sum) && (dmin < SL_IN_FIELD_MARGIN_CM || sum >= course / 100)) {
                    *out = (float)sum;
                    j->tps[k]++;
                    continue;
                }
            }
            if (dmin < SL_IN_FIELD_MARGIN_CM) {
                j->in_field[k]++;
                continue;
            }
            *out = (float)(course / 100); /* cGy to Gy */
        }
    }
}

sl_status sl_estimate_grid(const sl_estimate *e, double step_cm, sl_dose_grid **out,
                           sl_error *err)
{
    *out = NULL;
    const sl_location *loc = e->loc;
    if (!loc->external)
        return sl_error_set(err, SL_EINPUT,
                            "%s: no ROI is typed EXTERNAL: the dose grid covers the body contour",
                            e->ss->source);
    if (!(step_cm >= 0.1 && step_cm <= 2))
        return sl_error_set(err, SL_EUSAGE, "dose grid spacing %g cm: expected 0.1 to 2 cm",
                            step_cm);
    sl_slice_stack st;
    sl_status rc = sl_slices_build(loc->external, e->ss->source, loc->slice_spacing_cm, &st, err);
    if (rc != SL_OK)
        return rc;
    sl_body *body = NULL;
    rc = sl_body_create(&st, "EXTERNAL ROI", &body, err);
    sl_slices_free(&st);
    if (rc != SL_OK)
        return rc;
    sl_vec3 lo, hi;
    sl_body_bounds(body, &lo, &hi);
    double h = step_cm * 10;
    sl_dose_grid *g = calloc(1, sizeof *g);
    if (!g) {
        sl_body_free(body);
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    }
    /* voxel centres on whole multiples of the step, so that the grid does
     * not move with the body's margin */
    double x0 = ceil(lo.x * 10 / h) * h, y0 = ceil(lo.y * 10 / h) * h, z0 = ceil(lo.z * 10 / h) * h;
    g->nx = (size_t)fmax(1, floor((hi.x * 10 - x0) / h) + 1);
    g->ny = (size_t)fmax(1, floor((hi.y * 10 - y0) / h) + 1);
    g->nz = (size_t)fmax(1, floor((hi.z * 10 - z0) / h) + 1);
    g->x0_mm = x0;
    g->y0_mm = y0;
    g->z0_mm = z0;
    g->step_mm = h;
    if ((double)g->nx * (double)g->ny * (double)g->nz > (double)SL_RTDOSE_MAX_VOXELS) {
        sl_body_free(body);
        sl_dose_grid_free(g);
        return sl_error_set(err, SL_EUSAGE,
                            "a dose grid of %zu x %zu x %zu voxels is too large: choose a "
                            "coarser spacing",
                            g->nx, g->ny, g->nz);
    }
    g->gy = malloc(g->nx * g->ny * g->nz * sizeof *g->gy);
    size_t *inf = calloc(g->nz, sizeof *inf), *tps = calloc(g->nz, sizeof *tps);
    if (!g->gy || !inf || !tps) {
        free(inf);
        free(tps);
        sl_body_free(body);
        sl_dose_grid_free(g);
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    }
    grid_job j = {e, body, g, inf, tps};
    sl_parallel_for(g->nz, sl_parallel_threads(e->opt.threads), grid_slice, &j);
    for (size_t k = 0; k < g->nz; k++) {
        g->in_field_unestimated += inf[k];
        g->from_tps += tps[k];
    }
    free(inf);
    free(tps);
    sl_body_free(body);
    *out = g;
    return SL_OK;
}
