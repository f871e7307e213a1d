/*
 * strayline: the peripheral-dose profile model and its commissioning fit.
 *
 * Outside an electron field, the dose D (percent of the central-axis maximum)
 * at a distance d (cm) outward from the field edge is modelled as
 *
 *   smooth:  D(d) = A exp(-d / l1) + C exp(-d / l2)
 *   peaked:  D(d) = A exp(-d / l1) + C exp(-d / l2) + B exp(-(d - mu)^2 / (2 s^2))
 *
 * with l1 < l2: A, l1 the steep fall of electrons scattered in the patient
 * near the edge; B, mu, s a local maximum a few cm out from electrons
 * scattered by the applicator; C, l2 the slow tail of bremsstrahlung and
 * leakage. All seven are kept positive by fitting their logarithms. The A
 * and B terms are the "electron" part of the model (what a lead shield on
 * the skin stops), the C term the "photon" part.
 *
 * The fit is a weighted least-squares fit (weights 1/sigma^2 from the
 * stated measurement uncertainty) through the GSL engine of fit.h, with
 * Levenberg-Marquardt and geodesic acceleration, the analytic Jacobian,
 * several starting points derived from the data, and a choice between the
 * two forms by the corrected Akaike information criterion,
 *   AICc = chi^2 + 2k + 2k(k+1)/(n-k-1),
 * the form with the lower AICc being kept. A peaked fit counts only when its
 * bump is plausible and determined: mu within the measured range, s below
 * half of it, B below twice the largest measured dose, and each of B, mu, s
 * with a relative standard error below 50 %. Parameters are reported in
 * natural units with their covariance (propagated from the log-parameters),
 * scaled by the reduced chi-square when that exceeds 1 (data scattering more
 * than their stated uncertainty widen the parameter uncertainty; data that
 * scatter less do not narrow it).
 */
#ifndef STRAYLINE_PROFILE_H
#define STRAYLINE_PROFILE_H

#include <stdbool.h>
#include <stddef.h>

#include "strayline/error.h"

#ifdef __cplusplus
extern "C" {
#endif

typedef enum sl_profile_form { SL_FORM_SMOOTH, SL_FORM_PEAKED } sl_profile_form;

#define SL_PROFILE_MAX_PARAMS 7
/* Every fitted parameter lies in this range (percent, cm) in a model file: a
 * length beyond it is a profile that does not fall over its measured range. */
#define SL_PROFILE_PARAM_MIN 1e-12
#define SL_PROFILE_PARAM_MAX 1e4

/* Parameter order: A (percent), l1 (cm), C (percent), l2 (cm), then for the
 * peaked form B (percent), mu (cm), s (cm). */
enum { SL_P_A, SL_P_L1, SL_P_C, SL_P_L2, SL_P_B, SL_P_MU, SL_P_S };

/* A fit counts as poor when either of two tests fails at these false-alarm
 * probabilities for a good profile (data scattering as stated about the true
 * form): chi-square above its upper quantile for the fit's degrees of
 * freedom, or the largest residual beyond the limit that n independent
 * normal residuals pass with probability 1 - alpha (Sidak). Together about
 * 1 % of good profiles are called poor, whatever their number of points. */
#define SL_POOR_ALPHA_CHI2 0.005
#define SL_POOR_ALPHA_RESIDUAL 0.005

/* The two limits for n points and dof degrees of freedom. */
double sl_profile_poor_chi2_limit(size_t dof);
double sl_profile_poor_residual_limit(size_t n);

typedef struct sl_profile_fit {
    sl_profile_form form;
    size_t p;
    double theta[SL_PROFILE_MAX_PARAMS];
    double covar[SL_PROFILE_MAX_PARAMS * SL_PROFILE_MAX_PARAMS]; /* row-major p x p */
    double cov_scale;        /* max(1, reduced chi-square), already applied to covar */
    size_t n, dof;
    double chi2, chi2_red;
    double aicc;             /* of the form kept */
    double aicc_other;       /* of the other form (NAN when it could not be fitted) */
    double rms_residual_percent, max_residual_percent; /* in percent of the CAX maximum */
    double rms_residual_relative, max_residual_relative; /* fractions of the measured dose */
    double max_residual_sigma;
    double range_lo_cm, range_hi_cm; /* distances measured: the range of validity */
    bool poor;
} sl_profile_fit;

size_t sl_profile_nparams(sl_profile_form f);
const char *sl_profile_form_name(sl_profile_form f);
bool sl_profile_form_parse(const char *name, sl_profile_form *out);
/* Key of parameter i in the model file ("a_percent", "lambda1_cm", ...). */
const char *sl_profile_param_key(size_t i);

/* Model value at d (cm) for natural parameters; with grad, the gradient in
 * natural parameters. *electron and *photon (may be NULL) receive the A + B
 * and the C parts. */
double sl_profile_value(sl_profile_form f, const double *theta, double d, double *grad,
                        double *electron, double *photon);

/* The decay factors exp(delta / l1) and exp(delta / l2) of parameters
 * theta, for sl_profile_value_two. */
void sl_profile_decay_factors(const double *theta, double delta, double k[2]);

/* sl_profile_value without the gradient at two distances at once, d[0] and
 * d[1] = d[0] - delta (cm), with k the decay factors of theta for that
 * delta: the second distance's exponential terms are the first's times k,
 * a multiplication where the single evaluation takes an exponential. d[0]'s
 * value, electron and photon parts are bitwise sl_profile_value's; d[1]'s
 * agree with it within rounding that grows with the distance over the
 * decay length: a few times 1e-16 d / l relative for each term. */
void sl_profile_value_two(sl_profile_form f, const double *theta, const double d[2],
                          const double k[2], double value[2], double electron[2],
                          double photon[2]);

/* The factors sl_profile_value_three takes for a shift h (cm): k2 the decay
 * factors over 2 h, kh over h, and *gk = exp(-(h / s)^2) of a peaked
 * form's bump width s (1 for the smooth form). */
void sl_profile_shift_factors(sl_profile_form f, const double *theta, double h, double k2[2],
                              double kh[2], double *gk);

/* sl_profile_value_two at d[0] and d[1] = d[0] - 2 h with a third
 * distance d[2] = d[0] - h: its decaying exponentials are d[0]'s times kh,
 * and of a peaked form's bump, d[1]'s comes from d[0]'s and d[2]'s
 * (g(z - c) g(z + c) = g(z)^2 exp(-c^2) for g(z) = exp(-z^2 / 2)), so that
 * three distances take three exponentials where one takes two or three.
 * d[0]'s parts are bitwise sl_profile_value's; the others agree with it
 * within rounding that grows with the distance over the decay length and,
 * for the bump, over its width s (a few times 1e-16 d / l, and d / s:
 * 1.7e-12 relative measured at s = 0.007 cm), a bump below 1e-150 of its
 * height being evaluated directly. */
void sl_profile_value_three(sl_profile_form f, const double *theta, const double d[3],
                            const double k2[2], const double kh[2], double gk, double value[3],
                            double electron[3], double photon[3]);

/* Fit both forms to (d, D, sigma), n points with d increasing, and keep the
 * better by AICc. `what` names the profile in messages. */
sl_status sl_profile_fit_data(const double *d, const double *dose, const double *sigma, size_t n,
                              const char *what, sl_profile_fit *out, sl_error *err);

/* Fit one form only (the commissioning tests compare each form with an
 * independent fitter). */
sl_status sl_profile_fit_form(const double *d, const double *dose, const double *sigma, size_t n,
                              sl_profile_form form, const char *what, sl_profile_fit *out,
                              sl_error *err);

/* The fitted value at d and its standard uncertainty from the covariance
 * (delta method). */
double sl_profile_fit_eval(const sl_profile_fit *f, double d, double *u);

/* sl_profile_fit_eval with the electron (A + B) and photon (C) parts of the
 * same value (any of u, electron, photon may be NULL): one evaluation of the
 * exponentials where a caller needs all three, as model evaluation does at
 * every sample. */
double sl_profile_fit_eval_parts(const sl_profile_fit *f, double d, double *u, double *electron,
                                 double *photon);

/* The covariance's pair sums of a fit for sl_profile_fit_eval_sym: sym[i p
 * + j] = C_ij + C_ji for j > i, sym[i p + i] = C_ii (p x p, the rest
 * unused). */
void sl_profile_fit_sym(const sl_profile_fit *f, double sym[SL_PROFILE_MAX_PARAMS *
                                                          SL_PROFILE_MAX_PARAMS]);

/* sl_profile_fit_eval_parts with the pair sums computed beforehand
 * (sl_profile_fit_sym): bitwise the same, a sum fewer for each pair. */
double sl_profile_fit_eval_sym(const sl_profile_fit *f, const double *sym, double d, double *u,
                               double *electron, double *photon);

#ifdef __cplusplus
}
#endif

#endif
