/*
 * The triple-channel dose of one profile cell: the red, green and blue
 * channels' readings made to agree by one thickness factor.
 *
 * A film thicker or thinner than the calibration's darkens every channel in
 * proportion, unexposed or not: the perturbation scales each channel's
 * total optical density OD_k = log10(PV_max / PV_k), which is the unexposed
 * film's own OD0_k = log10(PV_max / PV0_k) plus the net optical density of
 * the dose (the triple-channel method as usually described, from memory:
 * Micke, Lewis and Yu, Med Phys 38:2523 (2011)). So a cell's readings obey
 * OD_k = tau (OD0_k + netOD_k(D)), and for a trial tau each channel reads
 * the dose D_k(tau) of netOD_k = OD_k / tau - OD0_k through its own curve.
 * The unexposed film's OD0_k, largest in the weakly responding blue channel,
 * pins tau down at any dose, zero included: a factor on the net optical
 * density alone (tried first) could not be told from dose in the faint tail,
 * where every channel's response is nearly linear.
 *
 * tau is the minimum of the weighted spread sum_k w_k (D_k(tau) - D)^2 in a
 * bounded range, D the weighted mean, w_k = 1 / sigma_k^2 with sigma_k each
 * channel's dose uncertainty (sl_film_dose) at tau = 1, or at the smallest
 * factor at which every channel is within its calibrated range when that is
 * above 1 (fixed, so that the spread cannot shrink by moving to where the
 * curves are less certain). The range searched starts no lower than that. A
 * grid over the range finds the lowest point and GSL's Brent minimiser
 * polishes it; a lowest point at either end of the range is reported as
 * on the bound, never taken (at a low end raised by a channel's calibrated
 * top, as above the range). The dose's uncertainty is that of the weighted least squares
 * in (tau, D): the inverse of J^T W J, J_k = (dD_k/dtau, -1), scaled by
 * max(1, chi^2 / 1) (three readings, two unknowns).
 */
#include "film_internal.h"

#include <gsl/gsl_errno.h>
#include <gsl/gsl_min.h>
#include <math.h>

#define TRIPLE_GRID 60

typedef struct cell_ctx {
    const sl_film_triple *t;
    double od[3], w[3];
} cell_ctx;

/* Each channel's dose at a trial tau; false when a channel has none there. */
static bool doses_at(const cell_ctx *c, double tau, double d[3])
{
    for (int k = 0; k < 3; k++) {
        d[k] = sl_film_dose(c->t->ch[k], c->od[k] / tau - c->t->od0[k], 0, NULL);
        if (!isfinite(d[k]))
            return false;
    }
    return true;
}

static double spread(double tau, void *p)
{
    const cell_ctx *c = p;
    double d[3];
    if (!doses_at(c, tau, d))
        return HUGE_VAL;
    double sw = 0, swd = 0;
    for (int k = 0; k < 3; k++) {
        sw += c->w[k];
        swd += c->w[k] * d[k];
    }
    double m = swd / sw, s = 0;
    for (int k = 0; k < 3; k++)
        s += c->w[k] * (d[k] - m) * (d[k] - m);
    return s;
}

void sl_film_triple_cell(const sl_film_triple *t, const double pv[3], const double sem[3],
                         sl_film_triple_result *out)
{
    cell_ctx c = {.t = t};
    out->status = SL_TRIPLE_ABOVE;
    out->tau = out->tau_sigma = out->dose_cgy = out->sigma_cgy = out->chisq = NAN;
    for (int k = 0; k < 3; k++) {
        if (!(pv[k] > 0) || !(pv[k] < t->max_value))
            return;
        c.od[k] = log10(t->max_value / pv[k]);
    }
    /* the range where every channel has a dose: netOD_k <= its calibrated top */
    double lo = t->tau_lo, hi = t->tau_hi;
    for (int k = 0; k < 3; k++)
        lo = fmax(lo, c.od[k] / (t->ch[k]->max_netod + t->od0[k]) * (1 + 1e-12));
    if (!(lo < hi))
        return; /* above a channel's calibrated range at every factor searched */
    /* the weights: at tau = 1, or where every channel first reads when that is above 1 */
    double tw = fmax(1, lo);
    for (int k = 0; k < 3; k++) {
        double sg;
        double d = sl_film_dose(t->ch[k], c.od[k] / tw - t->od0[k], sem[k] / pv[k] / M_LN10, &sg);
        c.w[k] = 1 / (sg * sg);
        if (!isfinite(d) || !isfinite(c.w[k]) || !(c.w[k] > 0))
            return;
    }
    double g[TRIPLE_GRID + 1];
    int best = 0;
    for (int i = 0; i <= TRIPLE_GRID; i++) {
        g[i] = spread(lo + (hi - lo) * i / TRIPLE_GRID, &c);
        if (g[i] < g[best])
            best = i;
    }
    if (!isfinite(g[best]))
        return;
    if (best == 0 || best == TRIPLE_GRID) {
        out->tau = best == 0 ? lo : hi;
        /* at the low end raised by a channel's calibrated top, the cell is above the range;
           at the range's own bound, the factor is beyond what is searched */
        if (!(best == 0 && lo > t->tau_lo))
            out->status = SL_TRIPLE_BOUND;
        return;
    }
    double a = lo + (hi - lo) * (best - 1) / TRIPLE_GRID, b = lo + (hi - lo) * (best + 1) / TRIPLE_GRID;
    double x = lo + (hi - lo) * best / TRIPLE_GRID;
    if (g[best] < g[best - 1] && g[best] < g[best + 1]) {
        gsl_function F = {spread, &c};
        gsl_min_fminimizer *m = gsl_min_fminimizer_alloc(gsl_min_fminimizer_brent);
        gsl_error_handler_t *old = gsl_set_error_handler_off();
        if (m && gsl_min_fminimizer_set_with_values(m, &F, x, g[best], a, g[best - 1], b,
                                                    g[best + 1]) == GSL_SUCCESS) {
            for (int it = 0; it < 200; it++) {
                if (gsl_min_fminimizer_iterate(m) != GSL_SUCCESS)
                    break;
                if (gsl_min_test_interval(gsl_min_fminimizer_x_lower(m),
                                          gsl_min_fminimizer_x_upper(m), 1e-10, 0) == GSL_SUCCESS)
                    break;
            }
            x = gsl_min_fminimizer_x_minimum(m);
        }
        gsl_set_error_handler(old);
        gsl_min_fminimizer_free(m);
    }
    double d[3], dp[3], dm[3], h = 1e-6;
    if (!doses_at(&c, x, d) || !doses_at(&c, x + h, dp) || !doses_at(&c, x - h, dm))
        return;
    double sw = 0, swd = 0, swa = 0, swaa = 0;
    for (int k = 0; k < 3; k++) {
        double ak = (dp[k] - dm[k]) / (2 * h);
        sw += c.w[k];
        swd += c.w[k] * d[k];
        swa += c.w[k] * ak;
        swaa += c.w[k] * ak * ak;
    }
    double mean = swd / sw, chisq = 0;
    for (int k = 0; k < 3; k++)
        chisq += c.w[k] * (d[k] - mean) * (d[k] - mean);
    double det = sw * swaa - swa * swa, scale = fmax(1, chisq);
    out->status = SL_TRIPLE_OK;
    out->tau = x;
    out->dose_cgy = mean;
    out->chisq = chisq;
    if (det > 0) {
        out->sigma_cgy = sqrt(swaa / det * scale);
        out->tau_sigma = sqrt(sw / det * scale);
    } else {
        /* the channels cannot tell tau (equal slopes): the dose's uncertainty is unknown */
        out->status = SL_TRIPLE_FLAT;
    }
}
