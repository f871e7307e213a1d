/*
 * Weighted nonlinear least squares over GSL's trust-region solver (see
 * include/strayline/fit.h).
 *
 * The caller's model is a plain function of one abscissa that can also give
 * its gradient; this file turns it into the residual vector and Jacobian that
 * gsl_multifit_nlinear wants, hands the weights 1/sigma^2 to GSL, runs the
 * Levenberg-Marquardt driver (optionally with geodesic acceleration) and
 * packs the parameters, the covariance (J^T W J)^-1 and NIST-style standard
 * errors into a plain struct. Everything numerical is GSL's; what lives here
 * is the checking that makes a bad fit an error instead of a number: input
 * validation before GSL sees the data, a finite model at the starting point,
 * the driver's status, and a finite, fully determined result. The residual
 * sum of squares is recomputed from the model at the final parameters so that
 * it never depends on what state the solver happened to leave behind.
 */
#include "strayline/fit.h"
#include "strayline/util.h"

#include <math.h>
#include <string.h>

#include <gsl/gsl_blas.h>
#include <gsl/gsl_errno.h>
#include <gsl/gsl_matrix.h>
#include <gsl/gsl_multifit_nlinear.h>
#include <gsl/gsl_vector.h>

void sl_fit_default_options(sl_fit_options *o)
{
    if (!o)
        return;
    o->max_iter = SL_FIT_DEFAULT_MAX_ITER;
    o->xtol = SL_FIT_DEFAULT_XTOL;
    o->gtol = SL_FIT_DEFAULT_GTOL;
    o->ftol = SL_FIT_DEFAULT_FTOL;
    o->geodesic = false;
}

/* Options with every 0 replaced by its default, so that a zeroed struct works. */
static sl_fit_options effective_options(const sl_fit_options *opt)
{
    sl_fit_options o;
    sl_fit_default_options(&o);
    if (opt) {
        if (opt->max_iter > 0)
            o.max_iter = opt->max_iter;
        if (opt->xtol > 0)
            o.xtol = opt->xtol;
        if (opt->gtol > 0)
            o.gtol = opt->gtol;
        if (opt->ftol > 0)
            o.ftol = opt->ftol;
        o.geodesic = opt->geodesic;
    }
    return o;
}

static sl_status check_options(const sl_fit_options *opt, sl_error *err)
{
    if (!opt)
        return SL_OK;
    /* A negative or NaN tolerance would make GSL's tests meaningless. */
    if (!(opt->xtol >= 0) || !(opt->gtol >= 0) || !(opt->ftol >= 0) || isinf(opt->xtol) ||
        isinf(opt->gtol) || isinf(opt->ftol))
        return sl_error_set(err, SL_EUSAGE,
                            "fit options: tolerances must be finite and >= 0 (0 = default)");
    return SL_OK;
}

static sl_status check_problem(const sl_fit_problem *pb, sl_error *err)
{
    if (!pb || !pb->model || !pb->x || !pb->y)
        return sl_error_set(err, SL_EUSAGE, "fit: the problem needs x, y and a model");
    if (pb->p == 0)
        return sl_error_set(err, SL_EINPUT, "fit: the model has no parameters");
    if (pb->p > SL_FIT_MAX_PARAMS)
        return sl_error_set(err, SL_EINPUT, "fit: %zu parameters, at most %d are supported",
                            pb->p, SL_FIT_MAX_PARAMS);
    if (pb->n <= pb->p)
        return sl_error_set(err, SL_EINPUT,
                            "fit: %zu data points for %zu parameters: need more points than "
                            "parameters",
                            pb->n, pb->p);
    for (size_t i = 0; i < pb->n; i++) {
        if (!isfinite(pb->x[i]))
            return sl_error_set(err, SL_EINPUT, "fit: data point %zu: x is not a finite number",
                                i + 1);
        if (!isfinite(pb->y[i]))
            return sl_error_set(err, SL_EINPUT, "fit: data point %zu: y is not a finite number",
                                i + 1);
        if (pb->sigma && !(isfinite(pb->sigma[i]) && pb->sigma[i] > 0))
            return sl_error_set(err, SL_EINPUT,
                                "fit: data point %zu: uncertainty sigma = %g, must be a finite "
                                "number > 0",
                                i + 1, pb->sigma[i]);
    }
    return SL_OK;
}

static sl_status check_start(const sl_fit_problem *pb, const double *theta0, size_t start,
                             sl_error *err)
{
    for (size_t j = 0; j < pb->p; j++)
        if (!isfinite(theta0[j]))
            return sl_error_set(err, SL_EINPUT,
                                "fit: starting point %zu: parameter %zu is not a finite number",
                                start + 1, j + 1);
    return SL_OK;
}

/* A model that is undefined where the search begins gives GSL nothing to work
 * with; say so plainly instead of reporting a failed fit. */
static sl_status check_model_at(const sl_fit_problem *pb, const double *theta, size_t start,
                                sl_error *err)
{
    double grad[SL_FIT_MAX_PARAMS];
    for (size_t i = 0; i < pb->n; i++) {
        double v = pb->model(pb->x[i], theta, grad, pb->ctx);
        if (!isfinite(v))
            return sl_error_set(err, SL_EINPUT,
                                "fit: starting point %zu: the model is not finite at data "
                                "point %zu (x = %g)",
                                start + 1, i + 1, pb->x[i]);
        for (size_t j = 0; j < pb->p; j++)
            if (!isfinite(grad[j]))
                return sl_error_set(err, SL_EINPUT,
                                    "fit: starting point %zu: the derivative by parameter %zu "
                                    "is not finite at data point %zu (x = %g)",
                                    start + 1, j + 1, i + 1, pb->x[i]);
    }
    return SL_OK;
}

/* GSL vectors may in principle be strided; the model wants a plain array. */
static void copy_theta(const gsl_vector *v, double *theta, size_t p)
{
    for (size_t j = 0; j < p; j++)
        theta[j] = gsl_vector_get(v, j);
}

/* What the GSL callbacks see: the problem, and a note of whether the solver
 * ever tried parameters where the model is not finite, so that a failure can
 * say why. One per fit, on the caller's stack: no shared state. */
typedef struct fit_ctx {
    const sl_fit_problem *pb;
    bool nonfinite_seen;
} fit_ctx;

/* Residual f_i = model(x_i) - y_i, unweighted: GSL applies sqrt(w_i) itself.
 * A non-finite value is passed on as it is and only noted: GSL 2.7 has no way
 * to back off from such a trial point (returning an error code makes its
 * driver retry the same step until max_iter), and the NAN then propagates to
 * the end, where fit_one refuses the result. */
static int cb_f(const gsl_vector *tv, void *data, gsl_vector *f)
{
    fit_ctx *c = data;
    const sl_fit_problem *pb = c->pb;
    double theta[SL_FIT_MAX_PARAMS];
    copy_theta(tv, theta, pb->p);
    for (size_t i = 0; i < pb->n; i++) {
        double r = pb->model(pb->x[i], theta, NULL, pb->ctx) - pb->y[i];
        if (!isfinite(r))
            c->nonfinite_seen = true;
        gsl_vector_set(f, i, r);
    }
    return GSL_SUCCESS;
}

static int cb_df(const gsl_vector *tv, void *data, gsl_matrix *J)
{
    fit_ctx *c = data;
    const sl_fit_problem *pb = c->pb;
    double theta[SL_FIT_MAX_PARAMS], grad[SL_FIT_MAX_PARAMS];
    copy_theta(tv, theta, pb->p);
    for (size_t i = 0; i < pb->n; i++) {
        (void)pb->model(pb->x[i], theta, grad, pb->ctx);
        for (size_t j = 0; j < pb->p; j++) {
            if (!isfinite(grad[j]))
                c->nonfinite_seen = true;
            gsl_matrix_set(J, i, j, grad[j]);
        }
    }
    return GSL_SUCCESS;
}

static void result_reset(sl_fit_result *res)
{
    memset(res, 0, sizeof *res);
    for (size_t j = 0; j < SL_FIT_MAX_PARAMS; j++) {
        res->theta[j] = NAN;
        res->stderr_nist[j] = NAN;
    }
    for (size_t k = 0; k < SL_FIT_MAX_PARAMS * SL_FIT_MAX_PARAMS; k++)
        res->covar[k] = NAN;
    res->chisq = NAN;
    res->rcond = NAN;
}

static double weighted_chisq(const sl_fit_problem *pb, const double *theta)
{
    double s = 0;
    for (size_t i = 0; i < pb->n; i++) {
        double r = pb->y[i] - pb->model(pb->x[i], theta, NULL, pb->ctx);
        if (pb->sigma)
            r /= pb->sigma[i];
        s += r * r;
    }
    return s;
}

/* One run of GSL's driver with the given trust-region subproblem method from
 * x0. Returns the driver's status; *wout is the workspace (NULL when it could
 * not be allocated), which the caller frees. */
static int drive(fit_ctx *c, const gsl_multifit_nlinear_trs *trs, const gsl_vector *x0,
                 gsl_vector *wts, const sl_fit_options *o, gsl_multifit_nlinear_workspace **wout,
                 int *info)
{
    const sl_fit_problem *pb = c->pb;
    gsl_multifit_nlinear_parameters params = gsl_multifit_nlinear_default_parameters();
    params.trs = trs;
    /* fvv stays NULL: with geodesic acceleration GSL then estimates the second
     * directional derivative by finite differences. */
    gsl_multifit_nlinear_fdf fdf;
    memset(&fdf, 0, sizeof fdf);
    fdf.f = cb_f;
    fdf.df = cb_df;
    fdf.n = pb->n;
    fdf.p = pb->p;
    fdf.params = c;
    *info = 0;
    *wout = gsl_multifit_nlinear_alloc(gsl_multifit_nlinear_trust, &params, pb->n, pb->p);
    if (!*wout)
        return GSL_ENOMEM;
    int gs = gsl_multifit_nlinear_winit(x0, wts, &fdf, *wout);
    if (gs != GSL_SUCCESS)
        return gs;
    return gsl_multifit_nlinear_driver(o->max_iter, o->xtol, o->gtol, o->ftol, NULL, NULL, info,
                                       *wout);
}

/* Columns of the weighted Jacobian whose pivot in GSL's rank-revealing QR is
 * below this fraction of the largest count as linearly dependent (their
 * parameters as undetermined). At 1e-13 the smallest pivot still carries about
 * three correct digits in double precision, so a variance from a column just
 * above the cut is still meaningful; two identical columns give about 1e-16,
 * and the ill-conditioned NIST problems stay above 1e-8. */
#define COVAR_EPSREL 1e-13

/* One fit on a validated problem and start; `start` only names it in messages. */
static sl_status fit_one(const sl_fit_problem *pb, const double *theta0, size_t start,
                         const sl_fit_options *o, sl_fit_result *res, sl_error *err)
{
    const size_t n = pb->n, p = pb->p;
    result_reset(res);
    res->dof = n - p;
    res->start_used = start;

    sl_status st = check_model_at(pb, theta0, start, err);
    if (st != SL_OK)
        return st;

    fit_ctx c = {.pb = pb, .nonfinite_seen = false};
    gsl_multifit_nlinear_workspace *w = NULL;
    gsl_vector *x0 = gsl_vector_alloc(p);
    gsl_vector *wts = pb->sigma ? gsl_vector_alloc(n) : NULL;
    gsl_matrix *covar = gsl_matrix_alloc(p, p);
    if (!x0 || !covar || (pb->sigma && !wts)) {
        st = sl_error_set(err, SL_ENOMEM, "fit: out of memory for %zu points", n);
        goto done;
    }
    for (size_t j = 0; j < p; j++)
        gsl_vector_set(x0, j, theta0[j]);
    if (wts)
        for (size_t i = 0; i < n; i++)
            gsl_vector_set(wts, i, 1.0 / (pb->sigma[i] * pb->sigma[i]));

    int info = 0;
    int gs = drive(&c, o->geodesic ? gsl_multifit_nlinear_trs_lmaccel
                                   : gsl_multifit_nlinear_trs_lm,
                   x0, wts, o, &w, &info);
    res->iterations = w ? gsl_multifit_nlinear_niter(w) : 0;
    res->gsl_status = gs;
    res->gsl_info = info;
    if (gs == GSL_ENOMEM || !w) {
        st = sl_error_set(err, SL_ENOMEM, "fit: out of memory for %zu points", n);
        goto done;
    }
    if (gs != GSL_SUCCESS) {
        const char *why = gsl_strerror(gs);
        if (c.nonfinite_seen)
            why = "the model was not finite at parameters the solver tried";
        else if (info == GSL_ENOPROG)
            why = "no step from the start reduced the residuals";
        st = sl_error_set(err, SL_EINPUT,
                          "fit: starting point %zu: did not converge: %s (%zu iterations)",
                          start + 1, why, res->iterations);
        goto done;
    }

    double theta[SL_FIT_MAX_PARAMS];
    copy_theta(gsl_multifit_nlinear_position(w), theta, p);
    double chisq = weighted_chisq(pb, theta);
    bool finite = isfinite(chisq);
    for (size_t j = 0; j < p; j++)
        finite = finite && isfinite(theta[j]);
    if (!finite) {
        st = sl_error_set(err, SL_EINPUT,
                          "fit: starting point %zu: did not converge: %s (%zu iterations)",
                          start + 1,
                          c.nonfinite_seen
                              ? "the model was not finite at parameters the solver tried"
                              : "the parameters or the model at the data are not finite",
                          res->iterations);
        goto done;
    }

    gs = gsl_multifit_nlinear_covar(gsl_multifit_nlinear_jac(w), COVAR_EPSREL, covar);
    if (gs != GSL_SUCCESS) {
        res->gsl_status = gs;
        st = sl_error_set(err, SL_EINPUT,
                          "fit: starting point %zu: did not converge: no covariance: %s",
                          start + 1, gsl_strerror(gs));
        goto done;
    }
    /* GSL's covariance sets the rows and columns of linearly dependent Jacobian
     * columns to zero: a zero variance means the data do not determine that
     * parameter where the solver stopped (for example a decay rate run off to
     * infinity, where the model no longer depends on it). */
    for (size_t j = 0; j < p; j++) {
        double cjj = gsl_matrix_get(covar, j, j);
        if (!(isfinite(cjj) && cjj > 0)) {
            st = sl_error_set(err, SL_EINPUT,
                              "fit: starting point %zu: did not converge: parameter %zu is not "
                              "determined by the data where the solver stopped (singular "
                              "Jacobian)",
                              start + 1, j + 1);
            goto done;
        }
        for (size_t k = 0; k < p; k++) {
            if (!isfinite(gsl_matrix_get(covar, j, k))) {
                st = sl_error_set(err, SL_EINPUT,
                                  "fit: starting point %zu: did not converge: the covariance "
                                  "is not finite",
                                  start + 1);
                goto done;
            }
        }
    }

    double rcond = NAN;
    if (gsl_multifit_nlinear_rcond(&rcond, w) != GSL_SUCCESS)
        rcond = NAN;

    const double s = sqrt(chisq / (double)(n - p));
    for (size_t j = 0; j < p; j++) {
        res->theta[j] = theta[j];
        for (size_t k = 0; k < p; k++)
            res->covar[j * p + k] = gsl_matrix_get(covar, j, k);
        res->stderr_nist[j] = s * sqrt(gsl_matrix_get(covar, j, j));
    }
    res->chisq = chisq;
    res->rcond = rcond;
    res->nconverged = 1;
    st = SL_OK;

done:
    if (st != SL_OK) {
        for (size_t j = 0; j < SL_FIT_MAX_PARAMS; j++)
            res->theta[j] = NAN;
    }
    gsl_matrix_free(covar);
    gsl_vector_free(wts);
    gsl_vector_free(x0);
    if (w)
        gsl_multifit_nlinear_free(w);
    return st;
}

sl_status sl_fit_run(const sl_fit_problem *pb, const double *theta0, const sl_fit_options *opt,
                     sl_fit_result *res, sl_error *err)
{
    return sl_fit_multistart(pb, theta0, 1, opt, res, err);
}

sl_status sl_fit_multistart(const sl_fit_problem *pb, const double *starts, size_t nstarts,
                            const sl_fit_options *opt, sl_fit_result *res, sl_error *err)
{
    if (!res)
        return sl_error_set(err, SL_EUSAGE, "fit: no result record");
    result_reset(res);
    sl_status st = check_problem(pb, err);
    if (st != SL_OK)
        return st;
    if ((st = check_options(opt, err)) != SL_OK)
        return st;
    if (!starts || nstarts == 0)
        return sl_error_set(err, SL_EUSAGE, "fit: no starting point");
    for (size_t s = 0; s < nstarts; s++)
        if ((st = check_start(pb, starts + s * pb->p, s, err)) != SL_OK)
            return st;

    sl_gsl_quiet();
    const sl_fit_options o = effective_options(opt);

    sl_fit_result trial, first_failure;
    sl_error first_err = {0};
    sl_status first_st = SL_OK;
    size_t converged = 0;
    for (size_t s = 0; s < nstarts; s++) {
        sl_error e = {0};
        st = fit_one(pb, starts + s * pb->p, s, &o, &trial, &e);
        if (st == SL_ENOMEM)
            return sl_error_set(err, st, "%s", e.msg);
        if (st != SL_OK) {
            if (first_st == SL_OK) {
                first_st = st;
                first_err = e;
                first_failure = trial;
            }
            continue;
        }
        converged++;
        if (converged == 1 || trial.chisq < res->chisq)
            *res = trial;
    }
    if (converged == 0) {
        /* Keep what the driver did on the first failure, for the caller's diagnosis. */
        *res = first_failure;
        if (nstarts == 1)
            return sl_error_set(err, first_st, "%s", first_err.msg);
        const char *first = first_err.msg;
        if (strncmp(first, "fit: ", 5) == 0)
            first += 5;
        return sl_error_set(err, first_st, "fit: none of %zu starting points converged; %s",
                            nstarts, first);
    }
    res->nconverged = converged;
    return SL_OK;
}

double sl_fit_eval(const sl_fit_problem *pb, const sl_fit_result *res, double x, double scale,
                   double *stderr_out)
{
    if (stderr_out)
        *stderr_out = NAN;
    if (!pb || !pb->model || !res || pb->p == 0 || pb->p > SL_FIT_MAX_PARAMS ||
        !(scale >= 0) || !isfinite(x))
        return NAN;
    const size_t p = pb->p;
    double grad[SL_FIT_MAX_PARAMS];
    double v = pb->model(x, res->theta, grad, pb->ctx);
    if (!isfinite(v))
        return NAN;
    for (size_t j = 0; j < p; j++)
        if (!isfinite(grad[j]))
            return v; /* the value stands; its standard error stays NAN */
    if (stderr_out) {
        /* g^T C g through GSL's BLAS; C is symmetric, so dsymv reads one triangle. */
        gsl_vector_const_view g = gsl_vector_const_view_array(grad, p);
        gsl_matrix_const_view C = gsl_matrix_const_view_array(res->covar, p, p);
        double cg[SL_FIT_MAX_PARAMS];
        gsl_vector_view cgv = gsl_vector_view_array(cg, p);
        gsl_blas_dsymv(CblasUpper, 1.0, &C.matrix, &g.vector, 0.0, &cgv.vector);
        double var = 0;
        gsl_blas_ddot(&g.vector, &cgv.vector, &var);
        /* Rounding can leave a tiny negative variance where it is zero. */
        if (isfinite(var))
            *stderr_out = sqrt(scale * fmax(var, 0.0));
    }
    return v;
}
