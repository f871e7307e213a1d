/*
 * The peripheral-dose profile model and its fit (see include/strayline/profile.h).
 *
 * The solver works on phi = (ln A, ln l1, ln C, ln l2, ln B, ln mu, ln s), which
 * keeps amplitudes, lengths and the bump's position positive without bounds;
 * results are turned back into natural units, with the covariance carried
 * through the Jacobian of that change of variables, diag(A, l1, C, l2, B, mu, s).
 */
#include "strayline/profile.h"
#include "strayline/fit.h"

#include <gsl/gsl_cdf.h>
#include <math.h>
#include <stdio.h>
#include <string.h>

static const char *const param_keys[SL_PROFILE_MAX_PARAMS] = {
    "a_percent", "lambda1_cm", "c_percent", "lambda2_cm", "b_percent", "mu_cm", "sigma_cm",
};

size_t sl_profile_nparams(sl_profile_form f)
{
    return f == SL_FORM_PEAKED ? 7 : 4;
}

const char *sl_profile_form_name(sl_profile_form f)
{
    return f == SL_FORM_PEAKED ? "peaked" : "smooth";
}

bool sl_profile_form_parse(const char *name, sl_profile_form *out)
{
    if (strcmp(name, "smooth") == 0)
        *out = SL_FORM_SMOOTH;
    else if (strcmp(name, "peaked") == 0)
        *out = SL_FORM_PEAKED;
    else
        return false;
    return true;
}

const char *sl_profile_param_key(size_t i)
{
    return i < SL_PROFILE_MAX_PARAMS ? param_keys[i] : NULL;
}

double sl_profile_value(sl_profile_form f, const double *t, double d, double *grad,
                        double *electron, double *photon)
{
    double e1 = exp(-d / t[SL_P_L1]), e2 = exp(-d / t[SL_P_L2]);
    double near = t[SL_P_A] * e1, tail = t[SL_P_C] * e2, peak = 0;
    if (grad) {
        grad[SL_P_A] = e1;
        grad[SL_P_L1] = near * d / (t[SL_P_L1] * t[SL_P_L1]);
        grad[SL_P_C] = e2;
        grad[SL_P_L2] = tail * d / (t[SL_P_L2] * t[SL_P_L2]);
    }
    if (f == SL_FORM_PEAKED) {
        double z = (d - t[SL_P_MU]) / t[SL_P_S];
        double g = exp(-0.5 * z * z);
        peak = t[SL_P_B] * g;
        if (grad) {
            grad[SL_P_B] = g;
            grad[SL_P_MU] = peak * z / t[SL_P_S];
            grad[SL_P_S] = peak * z * z / t[SL_P_S];
        }
    }
    if (electron)
        *electron = near + peak;
    if (photon)
        *photon = tail;
    return near + tail + peak;
}

void sl_profile_decay_factors(const double *t, double delta, double k[2])
{
    k[0] = exp(delta / t[SL_P_L1]);
    k[1] = exp(delta / t[SL_P_L2]);
}

/* Term for term sl_profile_value's arithmetic at d[0]; at d[1] the same
 * with the two decaying exponentials taken from d[0]'s. */
void sl_profile_value_two(sl_profile_form f, const double *t, const double d[2],
                          const double k[2], double value[2], double electron[2],
                          double photon[2])
{
    double e1 = exp(-d[0] / t[SL_P_L1]), e2 = exp(-d[0] / t[SL_P_L2]);
    const double e1s[2] = {e1, e1 * k[0]}, e2s[2] = {e2, e2 * k[1]};
    for (int i = 0; i < 2; i++) {
        double near = t[SL_P_A] * e1s[i], tail = t[SL_P_C] * e2s[i], peak = 0;
        if (f == SL_FORM_PEAKED) {
            double z = (d[i] - t[SL_P_MU]) / t[SL_P_S];
            peak = t[SL_P_B] * exp(-0.5 * z * z);
        }
        electron[i] = near + peak;
        photon[i] = tail;
        value[i] = near + tail + peak;
    }
}

void sl_profile_shift_factors(sl_profile_form f, const double *t, double h, double k2[2],
                              double kh[2], double *gk)
{
    sl_profile_decay_factors(t, 2 * h, k2);
    sl_profile_decay_factors(t, h, kh);
    double c = f == SL_FORM_PEAKED ? h / t[SL_P_S] : 0;
    *gk = exp(-c * c);
}

void sl_profile_value_three(sl_profile_form f, const double *t, const double d[3],
                            const double k2[2], const double kh[2], double gk, double value[3],
                            double electron[3], double photon[3])
{
    double e1 = exp(-d[0] / t[SL_P_L1]), e2 = exp(-d[0] / t[SL_P_L2]);
    const double e1s[3] = {e1, e1 * k2[0], e1 * kh[0]}, e2s[3] = {e2, e2 * k2[1], e2 * kh[1]};
    double g[3] = {0, 0, 0};
    if (f == SL_FORM_PEAKED) {
        double z0 = (d[0] - t[SL_P_MU]) / t[SL_P_S], z2 = (d[2] - t[SL_P_MU]) / t[SL_P_S];
        g[0] = exp(-0.5 * z0 * z0);
        g[2] = exp(-0.5 * z2 * z2);
        if (g[0] > 1e-150 && g[2] > 1e-150) {
            g[1] = g[2] / g[0] * g[2] * gk;
        } else {
            double z1 = (d[1] - t[SL_P_MU]) / t[SL_P_S];
            g[1] = exp(-0.5 * z1 * z1);
        }
    }
    for (int i = 0; i < 3; i++) {
        double near = t[SL_P_A] * e1s[i], tail = t[SL_P_C] * e2s[i], peak = 0;
        if (f == SL_FORM_PEAKED)
            peak = t[SL_P_B] * g[i];
        electron[i] = near + peak;
        photon[i] = tail;
        value[i] = near + tail + peak;
    }
}

/* The model in the solver's variables. */
typedef struct fit_ctx {
    sl_profile_form form;
} fit_ctx;

static double model_phi(double d, const double *phi, double *grad, void *ctx)
{
    const fit_ctx *c = ctx;
    double A = exp(phi[0]), l1 = exp(phi[1]), C = exp(phi[2]), l2 = exp(phi[3]);
    double t1 = A * exp(-d / l1), t2 = C * exp(-d / l2);
    double v = t1 + t2;
    if (grad) {
        grad[0] = t1;
        grad[1] = t1 * d / l1;
        grad[2] = t2;
        grad[3] = t2 * d / l2;
    }
    if (c->form == SL_FORM_PEAKED) {
        double B = exp(phi[4]), mu = exp(phi[5]), s = exp(phi[6]);
        double z = (d - mu) / s;
        double t3 = B * exp(-0.5 * z * z);
        v += t3;
        if (grad) {
            grad[4] = t3;
            grad[5] = t3 * z / s * mu;
            grad[6] = t3 * z * z;
        }
    }
    return v;
}

/* ------------------------------------------------ starting points -- */

/* Starting points, packed row after row with p values a row, as the
 * engine reads them. */
typedef struct starts {
    size_t n, p;
    double v[16 * SL_PROFILE_MAX_PARAMS];
} starts;

static void add_start(starts *s, const double *nat, size_t p)
{
    if (s->n >= 16)
        return;
    s->p = p;
    for (size_t i = 0; i < p; i++)
        s->v[s->n * p + i] = log(nat[i]);
    s->n++;
}

static double clampd(double v, double lo, double hi)
{
    return v < lo ? lo : v > hi ? hi : v;
}

/* A smooth start from the data: the tail's slope from the far points, the
 * near term from what the tail leaves at the edge. */
static void smooth_guess(const double *d, const double *y, size_t n, double g[4])
{
    double dmax = d[n - 1];
    size_t first = 0;
    while (first < n && d[first] < 0.6 * dmax)
        first++;
    if (n - first < 3)
        first = n >= 3 ? n - 3 : 0;
    double sx = 0, sy = 0, sxx = 0, sxy = 0, m = (double)(n - first);
    for (size_t i = first; i < n; i++) {
        double ly = log(y[i]);
        sx += d[i];
        sy += ly;
        sxx += d[i] * d[i];
        sxy += d[i] * ly;
    }
    double den = m * sxx - sx * sx;
    double slope = den > 0 ? (m * sxy - sx * sy) / den : -0.05;
    double icpt = (sy - slope * sx) / m;
    double l2 = slope < -1e-3 ? -1 / slope : 50;
    l2 = clampd(l2, 1, 200);
    double C = clampd(exp(icpt), 1e-4, 100);
    double A = fmax(y[0] - C, 0.1 * y[0]);
    double l1 = 0.5;
    for (size_t i = 0; i < n; i++) {
        double r = y[i] - C * exp(-d[i] / l2);
        if (r < A / M_E) {
            l1 = d[i] > 0.05 ? d[i] : 0.3;
            break;
        }
    }
    l1 = clampd(l1, 0.05, 0.8 * l2);
    g[SL_P_A] = A;
    g[SL_P_L1] = l1;
    g[SL_P_C] = C;
    g[SL_P_L2] = l2;
}

static void make_starts(const double *d, const double *y, size_t n, sl_profile_form form,
                        starts *s)
{
    double g[SL_PROFILE_MAX_PARAMS];
    smooth_guess(d, y, n, g);
    s->n = 0;
    if (form == SL_FORM_SMOOTH) {
        const double f1[] = {1, 0.5, 2, 1, 1}, f2[] = {1, 1, 1, 0.5, 2};
        for (int k = 0; k < 5; k++) {
            double v[4] = {g[0], g[1] * f1[k], g[2], g[3] * f2[k]};
            add_start(s, v, 4);
        }
        return;
    }
    /* the bump: where the data stand most above the smooth guess */
    double best = -INFINITY, mu = 0.3 * d[n - 1], amp = 0;
    for (size_t i = 0; i < n; i++) {
        if (d[i] < 0.5 || d[i] > 0.7 * d[n - 1])
            continue;
        double r = y[i] - sl_profile_value(SL_FORM_SMOOTH, g, d[i], NULL, NULL, NULL);
        if (r > best) {
            best = r;
            mu = d[i];
            amp = r;
        }
    }
    double base = sl_profile_value(SL_FORM_SMOOTH, g, mu, NULL, NULL, NULL);
    amp = fmax(amp, 0.2 * base);
    const double mus[] = {mu, 2.0, 4.0, 7.0};
    const double sig[] = {1.0, 2.5};
    for (int a = 0; a < 4; a++) {
        for (int b = 0; b < 2; b++) {
            double v[7] = {g[0], g[1], g[2], g[3], a == 0 ? amp : 0.3 * base, mus[a], sig[b]};
            add_start(s, v, 7);
        }
    }
}

/* ---------------------------------------------------------- fitting -- */

static void statistics(const double *d, const double *y, const double *sigma, size_t n,
                       sl_profile_fit *f)
{
    double s2 = 0, r2 = 0;
    f->max_residual_percent = f->max_residual_relative = f->max_residual_sigma = 0;
    for (size_t i = 0; i < n; i++) {
        double v = sl_profile_value(f->form, f->theta, d[i], NULL, NULL, NULL);
        double r = y[i] - v;
        s2 += r * r;
        r2 += (r / y[i]) * (r / y[i]);
        f->max_residual_percent = fmax(f->max_residual_percent, fabs(r));
        f->max_residual_relative = fmax(f->max_residual_relative, fabs(r / y[i]));
        f->max_residual_sigma = fmax(f->max_residual_sigma, fabs(r / sigma[i]));
    }
    f->rms_residual_percent = sqrt(s2 / (double)n);
    f->rms_residual_relative = sqrt(r2 / (double)n);
    f->poor = f->chi2 > sl_profile_poor_chi2_limit(f->dof) ||
              f->max_residual_sigma > sl_profile_poor_residual_limit(n);
}

double sl_profile_poor_chi2_limit(size_t dof)
{
    return dof ? gsl_cdf_chisq_Qinv(SL_POOR_ALPHA_CHI2, (double)dof) : INFINITY;
}

double sl_profile_poor_residual_limit(size_t n)
{
    /* P(max |z_i| <= t) = (1 - 2Q(t))^n = 1 - alpha  =>  Q(t) = (1 - (1 - alpha)^(1/n)) / 2;
     * -expm1(log1p(-alpha)/n) keeps the tiny tail probability exact */
    double q = -expm1(log1p(-SL_POOR_ALPHA_RESIDUAL) / (double)(n ? n : 1)) / 2;
    return gsl_cdf_ugaussian_Qinv(q);
}

sl_status sl_profile_fit_form(const double *d, const double *y, const double *sigma, size_t n,
                              sl_profile_form form, const char *what, sl_profile_fit *out,
                              sl_error *err)
{
    memset(out, 0, sizeof *out);
    size_t p = sl_profile_nparams(form);
    if (n < p + 2)
        return sl_error_set(err, SL_EINPUT, "%s: %zu points are too few for the %s form (%zu "
                                            "parameters)",
                            what, n, sl_profile_form_name(form), p);
    for (size_t i = 0; i < n; i++) {
        if (!(y[i] > 0) || !(sigma[i] > 0) || !isfinite(d[i]) || (i && !(d[i] > d[i - 1])))
            return sl_error_set(err, SL_EINPUT, "%s: point %zu is not fit to fit (dose %g, "
                                                "uncertainty %g, distance %g)",
                                what, i + 1, y[i], sigma[i], d[i]);
    }
    fit_ctx ctx = {form};
    sl_fit_problem pb = {n, p, d, y, sigma, model_phi, &ctx};
    starts st;
    make_starts(d, y, n, form, &st);
    sl_fit_options opt;
    sl_fit_default_options(&opt);
    opt.geodesic = true;
    sl_fit_result res;
    sl_error ferr = {0};
    sl_status rc = sl_fit_multistart(&pb, st.v, st.n, &opt, &res, &ferr);
    if (rc != SL_OK) {
        /* the plain Levenberg-Marquardt step from the same starts, before giving up */
        opt.geodesic = false;
        rc = sl_fit_multistart(&pb, st.v, st.n, &opt, &res, &ferr);
    }
    if (rc != SL_OK)
        return sl_error_set(err, rc, "%s: the %s form could not be fitted: %s", what,
                            sl_profile_form_name(form), ferr.msg);
    if (opt.geodesic) {
        /* geodesic acceleration's finite-difference second derivative turns
         * to noise near the minimum and stops the solver a little short on
         * weakly determined parameters: finish with plain steps */
        sl_fit_result polish;
        sl_fit_options popt = opt;
        popt.geodesic = false;
        if (sl_fit_run(&pb, res.theta, &popt, &polish, &ferr) == SL_OK && polish.chisq <= res.chisq)
            res = polish;
    }
    out->form = form;
    out->p = p;
    double jac[SL_PROFILE_MAX_PARAMS];
    for (size_t i = 0; i < p; i++) {
        out->theta[i] = exp(res.theta[i]);
        jac[i] = out->theta[i];
    }
    out->n = n;
    out->dof = n - p;
    out->chi2 = res.chisq;
    out->chi2_red = res.chisq / (double)out->dof;
    out->cov_scale = fmax(1.0, out->chi2_red);
    for (size_t i = 0; i < p; i++)
        for (size_t j = 0; j < p; j++)
            out->covar[i * p + j] = jac[i] * res.covar[i * p + j] * jac[j] * out->cov_scale;
    /* the near term is the steeper one */
    if (out->theta[SL_P_L1] > out->theta[SL_P_L2]) {
        const size_t a[2] = {SL_P_A, SL_P_L1}, c[2] = {SL_P_C, SL_P_L2};
        size_t perm[SL_PROFILE_MAX_PARAMS];
        for (size_t i = 0; i < p; i++)
            perm[i] = i;
        for (int k = 0; k < 2; k++) {
            perm[a[k]] = c[k];
            perm[c[k]] = a[k];
        }
        double t[SL_PROFILE_MAX_PARAMS], cv[SL_PROFILE_MAX_PARAMS * SL_PROFILE_MAX_PARAMS];
        for (size_t i = 0; i < p; i++) {
            t[i] = out->theta[perm[i]];
            for (size_t j = 0; j < p; j++)
                cv[i * p + j] = out->covar[perm[i] * p + perm[j]];
        }
        memcpy(out->theta, t, sizeof t);
        memcpy(out->covar, cv, sizeof cv);
    }
    for (size_t i = 0; i < p; i++) {
        /* a flat far field sends its length to infinity: say so here, by
         * the profile's name, not when the model file is read back */
        if (!(out->theta[i] >= SL_PROFILE_PARAM_MIN && out->theta[i] <= SL_PROFILE_PARAM_MAX))
            return sl_error_set(err, SL_EINPUT, "%s: the %s form's %s came out %g, outside "
                                                "%g to %g (%s the measured %g to %g cm)",
                                what, sl_profile_form_name(form), sl_profile_param_key(i),
                                out->theta[i], SL_PROFILE_PARAM_MIN, SL_PROFILE_PARAM_MAX,
                                i == SL_P_L1 || i == SL_P_L2
                                    ? "a level that does not fall: scan farther out than"
                                    : "the points do not determine it: check them over",
                                d[0], d[n - 1]);
    }
    double k = (double)p;
    out->aicc = out->chi2 + 2 * k + 2 * k * (k + 1) / ((double)n - k - 1);
    out->aicc_other = NAN;
    out->range_lo_cm = d[0];
    out->range_hi_cm = d[n - 1];
    statistics(d, y, sigma, n, out);
    return SL_OK;
}

sl_status sl_profile_fit_data(const double *d, const double *y, const double *sigma, size_t n,
                              const char *what, sl_profile_fit *out, sl_error *err)
{
    sl_profile_fit smooth, peaked;
    sl_status s1 = sl_profile_fit_form(d, y, sigma, n, SL_FORM_SMOOTH, what, &smooth, err);
    sl_error perr = {0};
    sl_status s2 = n >= 12 ? sl_profile_fit_form(d, y, sigma, n, SL_FORM_PEAKED, what, &peaked,
                                                 &perr)
                           : SL_EINPUT;
    if (s1 != SL_OK && s2 != SL_OK)
        return s1;
    /* a bump outside the measured range, broader than half of it, or taller
     * than twice the largest dose is not the applicator's local maximum but
     * the Gaussian standing in for something else: such a fit does not count */
    double ymax = 0;
    for (size_t i = 0; i < n; i++)
        ymax = fmax(ymax, y[i]);
    if (s2 == SL_OK && (peaked.theta[SL_P_MU] > d[n - 1] ||
                        peaked.theta[SL_P_S] > 0.5 * (d[n - 1] - d[0]) ||
                        peaked.theta[SL_P_B] > 2 * ymax))
        s2 = SL_EINPUT;
    /* nor is a bump that the data do not determine (a relative standard
     * error of its height, position or width of 50 % or more): a bump merged
     * into the edge's fall-off trades off against the near term */
    for (size_t k = SL_P_B; s2 == SL_OK && k <= SL_P_S; k++) {
        if (!(sqrt(peaked.covar[k * 7 + k]) < 0.5 * peaked.theta[k]))
            s2 = SL_EINPUT;
    }
    if (s1 != SL_OK && s2 != SL_OK)
        return s1; /* the smooth fit failed and the peaked one does not count */
    if (s2 == SL_OK && (s1 != SL_OK || peaked.aicc < smooth.aicc)) {
        *out = peaked;
        out->aicc_other = s1 == SL_OK ? smooth.aicc : NAN;
    } else {
        *out = smooth;
        out->aicc_other = s2 == SL_OK ? peaked.aicc : NAN;
    }
    return SL_OK;
}

double sl_profile_fit_eval(const sl_profile_fit *f, double d, double *u)
{
    return sl_profile_fit_eval_parts(f, d, u, NULL, NULL);
}

void sl_profile_fit_sym(const sl_profile_fit *f,
                        double sym[SL_PROFILE_MAX_PARAMS * SL_PROFILE_MAX_PARAMS])
{
    const size_t p = f->p;
    const double *c = f->covar;
    for (size_t i = 0; i < p; i++) {
        sym[i * p + i] = c[i * p + i];
        for (size_t j = i + 1; j < p; j++)
            sym[i * p + j] = c[i * p + j] + c[j * p + i];
    }
}

double sl_profile_fit_eval_sym(const sl_profile_fit *f, const double *sym, double d, double *u,
                               double *electron, double *photon)
{
    double g[SL_PROFILE_MAX_PARAMS];
    /* the gradient serves the uncertainty only */
    double v = sl_profile_value(f->form, f->theta, d, u ? g : NULL, electron, photon);
    if (u) {
        /* g' C g by rows of the upper triangle, each pair (i, j) once with
         * C_ij + C_ji (the same sum for any C): half the products of the
         * full double sum, and rows the processor can add side by side
         * instead of one chain of p * p additions, which was the costliest
         * step of evaluating a model (6 % of a scan's processor time) */
        const size_t p = f->p;
        double var = 0;
        for (size_t i = 0; i < p; i++) {
            double row = sym[i * p + i] * g[i];
            for (size_t j = i + 1; j < p; j++)
                row += sym[i * p + j] * g[j];
            var += g[i] * row;
        }
        *u = sqrt(fmax(var, 0));
    }
    return v;
}

double sl_profile_fit_eval_parts(const sl_profile_fit *f, double d, double *u, double *electron,
                                 double *photon)
{
    /* the pair sums of this call's covariance; a curve of the model keeps
     * them (sl_profile_fit_sym) and calls sl_profile_fit_eval_sym itself */
    double sym[SL_PROFILE_MAX_PARAMS * SL_PROFILE_MAX_PARAMS];
    if (u)
        sl_profile_fit_sym(f, sym);
    return sl_profile_fit_eval_sym(f, u ? sym : NULL, d, u, electron, photon);
}
