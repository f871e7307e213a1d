/*
 * strayline: a generic weighted nonlinear least-squares engine.
 *
 * Commissioning fits a model y = f(x; theta) to a machine's measured profiles
 * (for example dose in cGy against distance from the field edge in cm). This
 * module knows nothing about dose: it takes data points, their standard
 * uncertainties and a model with an analytic Jacobian, and returns the
 * parameters that minimise sum ((y_i - f(x_i)) / sigma_i)^2 together with
 * their covariance, using GSL's trust-region solver (gsl_multifit_nlinear).
 * Units are the caller's: theta, the covariance and standard errors carry the
 * units the model gives them, chisq is dimensionless when sigma is given and
 * in y's units squared otherwise.
 *
 * A converged solver does not prove the right minimum: a single start can
 * stop at a local minimum, or somewhere a parameter has run off (a decay rate
 * to infinity) and no longer matters. The second kind is refused: a fit whose
 * weighted Jacobian is numerically rank-deficient where the solver stopped
 * (a pivot of GSL's rank-revealing QR below 1e-13 of the largest) is reported
 * as not converged, because its covariance would be meaningless. Against the
 * first, sl_fit_multistart() fits from several starting points and keeps the
 * lowest residual sum of squares.
 *
 * The model should be finite for every parameter value the solver may try:
 * GSL 2.7 cannot step back from a trial point where the model is NAN, so such
 * a fit fails with "did not converge: the model was not finite at parameters
 * the solver tried". Reparametrise (for example fit log k instead of k > 0) to
 * keep the parameters inside the model's domain.
 *
 * GSL's error handler: GSL's default handler aborts the program on an error.
 * The first fit replaces that default handler, once for the process
 * (pthread_once), by GSL's "off" handler, so that GSL errors come back as
 * status codes that this module turns into sl_error records. This is process
 * wide: other code in the same process that calls GSL afterwards also gets
 * status codes instead of an abort (strayline checks every status anyway). A
 * handler that the host program installed itself before the first fit is kept
 * (put back at once). The module never saves and restores the handler around
 * each fit, because that would race when several threads fit at once.
 *
 * No printing, no exit, no other global state: separate calls may run on
 * separate threads.
 */
#ifndef STRAYLINE_FIT_H
#define STRAYLINE_FIT_H

#include <stdbool.h>
#include <stddef.h>

#include "strayline/error.h"

#ifdef __cplusplus
extern "C" {
#endif

#define SL_FIT_MAX_PARAMS 10

typedef struct sl_fit_problem {
    size_t n;              /* number of data points */
    size_t p;              /* number of parameters (1 <= p <= SL_FIT_MAX_PARAMS, p < n) */
    const double *x;       /* abscissae, n values */
    const double *y;       /* observations, n values */
    const double *sigma;   /* standard uncertainty of each y (n values, > 0), or NULL = unweighted */
    /* Model value at x for parameters theta; when grad != NULL also fill grad[0..p-1]
       with d model / d theta_j (analytic Jacobian). Must not fail; return NAN if undefined. */
    double (*model)(double x, const double *theta, double *grad, void *ctx);
    void *ctx;             /* passed unchanged to model */
} sl_fit_problem;

typedef struct sl_fit_options {
    size_t max_iter;          /* 0 -> default (SL_FIT_DEFAULT_MAX_ITER) */
    double xtol, gtol, ftol;  /* 0 -> defaults (see sl_fit_default_options) */
    bool geodesic;            /* Levenberg-Marquardt with geodesic acceleration (trs_lmaccel)
                                 instead of plain trs_lm. The second directional derivative
                                 is GSL's finite-difference estimate, which turns to rounding
                                 noise near the minimum: the solver then stops slightly short
                                 (seen up to about 1e-8 relative in the parameters, far below
                                 their standard errors), where plain LM usually reaches the
                                 minimum to rounding. It helps from poor starting points. */
} sl_fit_options;

#define SL_FIT_DEFAULT_MAX_ITER 500
/* GSL stops on a small step (xtol, relative to |x_i| but also absolute, so that parameters
   near 0 can converge) or a small scaled gradient (gtol); see gsl_multifit_nlinear_test in
   the GSL manual. GSL 2.7.1 accepts ftol but does not test it (a large ftol does not stop it
   early). The defaults are tight on purpose: with 1e-8 the NIST StRD problems MGH09 and
   Lanczos3 stop with only 4 to 5 correct digits. */
#define SL_FIT_DEFAULT_XTOL 1e-14
#define SL_FIT_DEFAULT_GTOL 1e-14
#define SL_FIT_DEFAULT_FTOL 1e-14

typedef struct sl_fit_result {
    double theta[SL_FIT_MAX_PARAMS];
    double covar[SL_FIT_MAX_PARAMS * SL_FIT_MAX_PARAMS]; /* (J^T W J)^-1, row-major p x p, unscaled */
    double stderr_nist[SL_FIT_MAX_PARAMS]; /* sqrt(chisq/(n-p)) * sqrt(C_ii): NIST's definition.
                                              With trusted sigmas, sqrt(C_ii) alone is the
                                              standard error; this one rescales it by the
                                              scatter the data show. */
    double chisq;         /* weighted residual sum of squares, sum ((y-f)/sigma)^2 (or unweighted) */
    size_t dof;           /* n - p */
    size_t iterations;
    int gsl_status;       /* what the GSL driver returned */
    size_t start_used;    /* index of the starting point that won (multistart; from 0, where
                             messages count starting points from 1) */
    /* Additions: */
    int gsl_info;         /* why the driver stopped: 1 step below xtol, 2 gradient below gtol */
    double rcond;         /* reciprocal condition number of the weighted Jacobian, as GSL's
                             solver estimates it (gsl_multifit_nlinear_rcond); for information */
    size_t nconverged;    /* starting points that converged (1 for sl_fit_run) */
} sl_fit_result;

/* Fill o with the defaults: SL_FIT_DEFAULT_MAX_ITER, SL_FIT_DEFAULT_XTOL, _GTOL, _FTOL,
   geodesic = false. */
void sl_fit_default_options(sl_fit_options *o);

/* One fit from theta0 (p values). opt may be NULL (defaults).
   SL_EUSAGE for NULL pointers; SL_EINPUT with a clear message for n <= p, p too large,
   non-finite data, sigma <= 0, a non-finite starting point or a model that is not finite
   at the starting point; SL_EINPUT "did not converge ..." when the driver fails or the
   result is non-finite or leaves a parameter undetermined (singular Jacobian).
   On failure res->gsl_status and res->iterations still say what the driver did and
   res->theta holds NAN. */
sl_status sl_fit_run(const sl_fit_problem *pb, const double *theta0, const sl_fit_options *opt,
                     sl_fit_result *res, sl_error *err);

/* Fit from each of nstarts starting points (row-major nstarts x p) and keep the lowest chisq
   among the fits that converged; error only if none converged (the message then repeats the
   first failure). Input errors (as for sl_fit_run) are reported before any fit; a start
   where the model is not finite counts as one that did not converge. */
sl_status sl_fit_multistart(const sl_fit_problem *pb, const double *starts, size_t nstarts,
                            const sl_fit_options *opt, sl_fit_result *res, sl_error *err);

/* Model value and its standard error at x from the covariance (delta method: g^T C g, with C
   scaled by `scale`, e.g. 1 or the reduced chi-square). stderr_out may be NULL. Returns NAN
   (and NAN in *stderr_out) for NULL arguments, scale < 0, a non-finite x or a model that is
   undefined at x (a failed fit's theta is NAN, so its value is NAN too). */
double sl_fit_eval(const sl_fit_problem *pb, const sl_fit_result *res, double x, double scale,
                   double *stderr_out);

#ifdef __cplusplus
}
#endif

#endif
