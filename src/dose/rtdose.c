/*
 * A planning system's dose grid as plain C data (see include/strayline/rtdose.h):
 * freeing, the check that it belongs to the plan, and its trilinear value at
 * a point. Reading it is the DCMTK bridge's job (src/dicom/rtdose.cc).
 */
#include "strayline/rtdose.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

void sl_rtdose_free(sl_rtdose *d)
{
    if (!d)
        return;
    free(d->source);
    free(d->sop_instance_uid);
    free(d->study_uid);
    free(d->frame_uid);
    free(d->plan_uid);
    free(d->beams);
    free(d->z_mm);
    free(d->gy);
    free(d);
}

sl_status sl_rtdose_check_plan(const sl_rtdose *d, const sl_plan *plan, sl_error *err)
{
    if (!plan->frame_uid || strcmp(plan->frame_uid, d->frame_uid) != 0)
        return sl_error_set(err, SL_EINPUT,
                            "%s: FrameOfReferenceUID (0020,0052) '%s' is not the plan's (%s: "
                            "'%s'): the dose grid is in another patient frame",
                            d->source, d->frame_uid, plan->source,
                            plan->frame_uid ? plan->frame_uid : "none");
    if (!plan->sop_instance_uid || strcmp(plan->sop_instance_uid, d->plan_uid) != 0)
        return sl_error_set(err, SL_EINPUT,
                            "%s: ReferencedRTPlanSequence (300C,0002) names plan '%s', not %s "
                            "('%s'): the dose was computed for another plan",
                            d->source, d->plan_uid, plan->source,
                            plan->sop_instance_uid ? plan->sop_instance_uid : "none");
    for (size_t k = 0; k < d->nbeams; k++) {
        bool found = false;
        for (size_t b = 0; b < plan->nbeams && !found; b++)
            found = plan->beams[b].number == d->beams[k];
        if (!found)
            return sl_error_set(err, SL_EINPUT,
                                "%s: ReferencedBeamNumber (300C,0006) %d is not a beam of %s",
                                d->source, d->beams[k], plan->source);
    }
    return SL_OK;
}

/* Index of the cell [k, k + 1) of monotonic positions z holding v, and the
 * weight of k + 1; false outside. */
static bool bracket(const double *z, size_t n, double v, size_t *k, double *w)
{
    if (n == 1) {
        if (fabs(v - z[0]) > 1e-6)
            return false;
        *k = 0;
        *w = 0;
        return true;
    }
    bool up = z[n - 1] > z[0];
    double lo = up ? z[0] : z[n - 1], hi = up ? z[n - 1] : z[0];
    if (!(v >= lo && v <= hi))
        return false;
    size_t a = 0, b = n - 1; /* z[a] .. z[b] brackets v (in the grid's order) */
    while (b - a > 1) {
        size_t m = (a + b) / 2;
        if ((z[m] <= v) == up)
            a = m;
        else
            b = m;
    }
    *k = a;
    *w = (v - z[a]) / (z[b] - z[a]);
    return true;
}

static bool bracket_even(double x0, double dx, size_t n, double v, size_t *k, double *w)
{
    double f = (v - x0) / dx;
    if (!(f >= -1e-9 && f <= (double)(n - 1) + 1e-9))
        return false;
    if (n == 1) {
        *k = 0;
        *w = 0;
        return true;
    }
    if (f < 0)
        f = 0;
    size_t i = (size_t)f;
    if (i >= n - 1)
        i = n - 2;
    *k = i;
    *w = f - (double)i;
    return true;
}

double sl_rtdose_at(const sl_rtdose *d, double x_mm, double y_mm, double z_mm)
{
    size_t i, j, k;
    double wx, wy, wz;
    if (!bracket_even(d->x0_mm, d->dx_mm, d->nx, x_mm, &i, &wx) ||
        !bracket_even(d->y0_mm, d->dy_mm, d->ny, y_mm, &j, &wy) ||
        !bracket(d->z_mm, d->nz, z_mm, &k, &wz))
        return NAN;
    size_t i1 = d->nx > 1 ? i + 1 : i, j1 = d->ny > 1 ? j + 1 : j, k1 = d->nz > 1 ? k + 1 : k;
    const float *g = d->gy;
#define V(a, b, c) ((double)g[((c) * d->ny + (b)) * d->nx + (a)])
    double c00 = V(i, j, k) * (1 - wx) + V(i1, j, k) * wx;
    double c10 = V(i, j1, k) * (1 - wx) + V(i1, j1, k) * wx;
    double c01 = V(i, j, k1) * (1 - wx) + V(i1, j, k1) * wx;
    double c11 = V(i, j1, k1) * (1 - wx) + V(i1, j1, k1) * wx;
#undef V
    double c0 = c00 * (1 - wy) + c10 * wy, c1 = c01 * (1 - wy) + c11 * wy;
    return c0 * (1 - wz) + c1 * wz;
}
