/*
 * Model files: reading (strict, through yamlio) and writing (libyaml's
 * emitter). The layout is documented in models/README.md; a change here
 * needs a change there and, when old files would no longer read, a new
 * format_version.
 */
#include "strayline/measure.h"
#include "strayline/model.h"
#include "strayline/util.h"
#include "strayline/yamlio.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

static void profile_free(sl_model_profile *p)
{
    free(p->applicator);
    free(p->insert);
    free(p->direction);
    free(p->data_file);
    free(p->distance_cm);
    free(p->dose_percent);
}

void sl_model_free(sl_model *m)
{
    if (!m)
        return;
    free(m->source);
    free(m->model_version);
    free(m->notice);
    sl_machine_free(&m->machine);
    sl_provenance *p = &m->provenance;
    free(p->measurement_set);
    free(p->measurement_set_sha256);
    free(p->tool);
    free(p->created);
    free(p->measured_date);
    free(p->measured_by);
    free(p->detector);
    free(p->reference);
    for (size_t i = 0; i < m->nprofiles; i++)
        profile_free(&m->profiles[i]);
    free(m->profiles);
    for (size_t i = 0; i < m->nscales; i++) {
        free(m->scales[i].applicator);
        free(m->scales[i].first_date);
        free(m->scales[i].last_date);
        free(m->scales[i].source);
    }
    free(m->scales);
    free(m);
}

/* ------------------------------------------------------------ reading -- */

static sl_status read_sha(sl_yaml *y, yaml_node_t *n, const char *what, char out[SL_SHA256_HEX_LEN],
                          sl_error *err)
{
    char *s = NULL;
    sl_status st = sl_yaml_string(y, n, what, &s, err);
    if (st != SL_OK)
        return st;
    bool ok = strlen(s) == 64;
    for (size_t i = 0; ok && i < 64; i++)
        ok = (s[i] >= '0' && s[i] <= '9') || (s[i] >= 'a' && s[i] <= 'f');
    if (ok)
        memcpy(out, s, SL_SHA256_HEX_LEN);
    free(s);
    return ok ? SL_OK : sl_yaml_error(y, n, err, "%s: expected 64 lowercase hex digits", what);
}

static sl_status read_fit(sl_yaml *y, yaml_node_t *n, const char *what, sl_profile_fit *f,
                          sl_error *err)
{
    sl_yaml_field k[] = {{"form", true, NULL},
                         {"parameters", true, NULL},
                         {"covariance", true, NULL},
                         {"covariance_scale", true, NULL},
                         {"n", true, NULL},
                         {"dof", true, NULL},
                         {"chi2", true, NULL},
                         {"chi2_reduced", true, NULL},
                         {"aicc", true, NULL},
                         {"aicc_other", false, NULL},
                         {"rms_residual_percent", true, NULL},
                         {"max_residual_percent", true, NULL},
                         {"rms_residual_relative", true, NULL},
                         {"max_residual_relative", true, NULL},
                         {"max_residual_sigma", true, NULL},
                         {"poor", true, NULL}};
    enum { NK = sizeof k / sizeof *k };
    sl_status st = sl_yaml_fields(y, n, what, k, NK, err);
    char *form = NULL;
    if (st == SL_OK)
        st = sl_yaml_string(y, k[0].node, "form", &form, err);
    if (st == SL_OK && !sl_profile_form_parse(form, &f->form))
        st = sl_yaml_error(y, k[0].node, err, "%s: form '%s' (smooth or peaked)", what, form);
    free(form);
    if (st != SL_OK)
        return st;
    f->p = sl_profile_nparams(f->form);
    sl_yaml_field pk[SL_PROFILE_MAX_PARAMS];
    for (size_t i = 0; i < f->p; i++)
        pk[i] = (sl_yaml_field){sl_profile_param_key(i), true, NULL};
    st = sl_yaml_fields(y, k[1].node, "parameters", pk, f->p, err);
    for (size_t i = 0; st == SL_OK && i < f->p; i++) {
        st = sl_yaml_number_in(y, pk[i].node, pk[i].key, SL_PROFILE_PARAM_MIN,
                               SL_PROFILE_PARAM_MAX, &f->theta[i], err);
    }
    yaml_node_item_t *rows;
    size_t nrows;
    if (st == SL_OK)
        st = sl_yaml_seq(y, k[2].node, "covariance", &rows, &nrows, err);
    if (st == SL_OK && nrows != f->p)
        st = sl_yaml_error(y, k[2].node, err, "%s: covariance has %zu rows, the %s form %zu",
                           what, nrows, sl_profile_form_name(f->form), f->p);
    for (size_t i = 0; st == SL_OK && i < f->p; i++) {
        double *row;
        size_t nc;
        yaml_node_t *rn = sl_yaml_item(y, rows[i]);
        st = sl_yaml_numbers(y, rn, "covariance row", &row, &nc, err);
        if (st != SL_OK)
            break;
        if (nc != f->p)
            st = sl_yaml_error(y, rn, err, "%s: covariance row %zu has %zu values, not %zu", what,
                               i + 1, nc, f->p);
        for (size_t j = 0; st == SL_OK && j < nc; j++)
            f->covar[i * f->p + j] = row[j];
        free(row);
    }
    for (size_t i = 0; st == SL_OK && i < f->p; i++) {
        if (f->covar[i * f->p + i] < 0)
            st = sl_yaml_error(y, k[2].node, err, "%s: a variance (diagonal) is negative", what);
        for (size_t j = 0; st == SL_OK && j < i; j++) {
            double a = f->covar[i * f->p + j], b = f->covar[j * f->p + i];
            if (fabs(a - b) > 1e-9 * (fabs(a) + fabs(b)) + 1e-300)
                st = sl_yaml_error(y, k[2].node, err, "%s: the covariance is not symmetric",
                                   what);
        }
    }
    int ni = 0, dof = 0;
    if (st == SL_OK)
        st = sl_yaml_number_in(y, k[3].node, "covariance_scale", 1, 1e6, &f->cov_scale, err);
    if (st == SL_OK)
        st = sl_yaml_int(y, k[4].node, "n", &ni, err);
    if (st == SL_OK)
        st = sl_yaml_int(y, k[5].node, "dof", &dof, err);
    if (st == SL_OK && (ni < 1 || dof < 1 || (size_t)dof + f->p != (size_t)ni))
        st = sl_yaml_error(y, k[5].node, err, "%s: dof %d does not equal n %d minus %zu "
                                              "parameters",
                           what, dof, ni, f->p);
    f->n = (size_t)ni;
    f->dof = (size_t)dof;
    double *slots[] = {&f->chi2, &f->chi2_red, &f->aicc, NULL, &f->rms_residual_percent,
                       &f->max_residual_percent, &f->rms_residual_relative,
                       &f->max_residual_relative, &f->max_residual_sigma};
    for (size_t i = 0; st == SL_OK && i < 9; i++) {
        if (!slots[i])
            continue;
        double lo = i == 2 ? -1e300 : 0;
        st = sl_yaml_number_in(y, k[6 + i].node, k[6 + i].key, lo, 1e300, slots[i], err);
    }
    f->aicc_other = NAN;
    if (st == SL_OK && k[9].node)
        st = sl_yaml_number(y, k[9].node, "aicc_other", &f->aicc_other, err);
    if (st == SL_OK)
        st = sl_yaml_bool(y, k[15].node, "poor", &f->poor, err);
    return st;
}

/* A fit that its own points contradict: a file edited by hand (or a fit
 * made by something else) could otherwise drop the poor mark and its
 * widening, or carry parameters that read low, and load silently. The
 * points and the stated uncertainty give the chi-square and the largest
 * residual again (as sl_profile_fit_data did); a fit marked good that they
 * call poor, a point count that is not the fit's, or a parameter whose
 * variance is not positive, is refused. A fit marked poor that the points
 * call good is kept: the mark only widens the uncertainty. */
static sl_status check_fit_on_points(sl_yaml *y, yaml_node_t *node, const char *what,
                                     const sl_model_profile *p, sl_error *err)
{
    const sl_profile_fit *f = &p->fit;
    if (f->n != p->n)
        return sl_yaml_error(y, node, err, "%s: fit n is %zu, but the profile holds %zu points",
                             what, f->n, p->n);
    for (size_t i = 0; i < f->p; i++)
        if (!(f->covar[i * f->p + i] > 0))
            return sl_yaml_error(y, node, err,
                                 "%s: the variance of %s is not positive: a fitted parameter "
                                 "always has some uncertainty",
                                 what, sl_profile_param_key(i));
    double chi2 = 0, zmax = 0;
    for (size_t i = 0; i < p->n; i++) {
        double v = sl_profile_value(f->form, f->theta, p->distance_cm[i], NULL, NULL, NULL);
        double rel = p->rel_uncertainty * p->dose_percent[i];
        double sigma = sqrt(rel * rel + p->floor_percent * p->floor_percent);
        double z = (p->dose_percent[i] - v) / sigma;
        chi2 += z * z;
        zmax = fmax(zmax, fabs(z));
    }
    bool poor = chi2 > sl_profile_poor_chi2_limit(f->dof) ||
                zmax > sl_profile_poor_residual_limit(p->n);
    if (poor && !f->poor)
        return sl_yaml_error(y, node, err,
                             "%s: the fit is marked good (poor: false), but its own points give "
                             "a chi-square of %.4g (limit %.4g) and a largest residual of %.3g "
                             "standard uncertainties (limit %.3g): parameters or points edited?",
                             what, chi2, sl_profile_poor_chi2_limit(f->dof), zmax,
                             sl_profile_poor_residual_limit(p->n));
    return SL_OK;
}

static sl_status read_profile(sl_yaml *y, yaml_node_t *n, size_t idx, sl_model *m, sl_error *err)
{
    char what[64];
    snprintf(what, sizeof what, "profile %zu", idx + 1);
    sl_model_profile *p = &m->profiles[idx];
    p->width_found_cm = p->width_nominal_cm = NAN;
    sl_yaml_field k[] = {{"energy_mev", true, NULL}, {"applicator", true, NULL},
                         {"insert", true, NULL},     {"depth_cm", true, NULL},
                         {"direction", true, NULL},  {"data_file", true, NULL},
                         {"data_sha256", true, NULL}, {"uncertainty", true, NULL},
                         {"edge", false, NULL},      {"range_cm", true, NULL},
                         {"fit", true, NULL},        {"points", true, NULL},
                         {"tilt_deg", false, NULL},  {"ssd_cm", false, NULL}};
    enum { NK = sizeof k / sizeof *k };
    sl_status st = sl_yaml_fields(y, n, what, k, NK, err);
    /* version 1 knew neither: its profiles are at normal incidence and the
     * nominal SSD; version 2 states both for every profile */
    p->tilt_deg = 0;
    p->ssd_cm = m->machine.nominal_ssd_cm;
    for (size_t i = NK - 2; st == SL_OK && i < NK; i++) {
        if (m->format_version < 2 && k[i].node)
            st = sl_yaml_error(y, k[i].node, err, "%s: %s needs format_version 2", what,
                               k[i].key);
        else if (m->format_version >= 2 && !k[i].node)
            st = sl_yaml_error(y, n, err, "%s: missing key '%s'", what, k[i].key);
    }
    if (st == SL_OK && k[NK - 2].node)
        st = sl_yaml_number_in(y, k[NK - 2].node, "tilt_deg", -SL_TILT_MAX_DEG, SL_TILT_MAX_DEG,
                               &p->tilt_deg, err);
    if (st == SL_OK && k[NK - 1].node)
        st = sl_yaml_number_in(y, k[NK - 1].node, "ssd_cm",
                               m->machine.nominal_ssd_cm - SL_MEAS_SSD_SHORT_CM,
                               m->machine.nominal_ssd_cm + SL_MEAS_SSD_LONG_CM, &p->ssd_cm, err);
    if (st == SL_OK)
        st = sl_yaml_number_in(y, k[0].node, "energy_mev", 1, 50, &p->energy_mev, err);
    if (st == SL_OK)
        st = sl_yaml_string(y, k[1].node, what, &p->applicator, err);
    if (st == SL_OK && !sl_machine_output(&m->machine, p->energy_mev, p->applicator))
        st = sl_yaml_error(y, n, err, "%s: no output is given for %g MeV, applicator '%s'", what,
                           p->energy_mev, p->applicator);
    if (st == SL_OK)
        st = sl_yaml_string(y, k[2].node, what, &p->insert, err);
    if (st == SL_OK && strcmp(p->insert, SL_INSERT_OPEN) != 0 &&
        !sl_machine_insert(&m->machine, p->applicator, p->insert))
        st = sl_yaml_error(y, k[2].node, err, "%s: insert '%s' is not listed for applicator '%s'",
                           what, p->insert, p->applicator);
    if (st == SL_OK)
        st = sl_yaml_number_in(y, k[3].node, "depth_cm", 0, 10, &p->depth_cm, err);
    if (st == SL_OK)
        st = sl_yaml_string(y, k[4].node, what, &p->direction, err);
    if (st == SL_OK)
        st = sl_yaml_string(y, k[5].node, what, &p->data_file, err);
    if (st == SL_OK)
        st = read_sha(y, k[6].node, "data_sha256", p->sha256, err);
    if (st == SL_OK) {
        sl_yaml_field u[] = {{"relative", true, NULL}, {"floor_percent", true, NULL}};
        st = sl_yaml_fields(y, k[7].node, "uncertainty", u, 2, err);
        if (st == SL_OK)
            st = sl_yaml_number_in(y, u[0].node, "relative", 0.001, 1, &p->rel_uncertainty, err);
        if (st == SL_OK)
            st = sl_yaml_number_in(y, u[1].node, "floor_percent", 0, 10, &p->floor_percent, err);
    }
    if (st == SL_OK && k[8].node) {
        sl_yaml_field e[] = {{"width_found_cm", true, NULL}, {"width_nominal_cm", false, NULL}};
        st = sl_yaml_fields(y, k[8].node, "edge", e, 2, err);
        p->from_positions = true;
        if (st == SL_OK)
            st = sl_yaml_number_in(y, e[0].node, "width_found_cm", 0.1, 100, &p->width_found_cm,
                                   err);
        if (st == SL_OK && e[1].node)
            st = sl_yaml_number_in(y, e[1].node, "width_nominal_cm", 0.1, 100,
                                   &p->width_nominal_cm, err);
    }
    double *range = NULL;
    size_t nr = 0;
    if (st == SL_OK)
        st = sl_yaml_numbers(y, k[9].node, "range_cm", &range, &nr, err);
    if (st == SL_OK && (nr != 2 || !(range[0] >= 0 && range[1] > range[0])))
        st = sl_yaml_error(y, k[9].node, err, "%s: range_cm must be [first, last] with "
                                              "0 <= first < last",
                           what);
    if (st == SL_OK)
        st = read_fit(y, k[10].node, "fit", &p->fit, err);
    if (st == SL_OK) {
        p->fit.range_lo_cm = range[0];
        p->fit.range_hi_cm = range[1];
    }
    free(range);
    if (st == SL_OK) {
        sl_yaml_field q[] = {{"distance_cm", true, NULL}, {"dose_percent", true, NULL}};
        size_t nd = 0, nv = 0;
        st = sl_yaml_fields(y, k[11].node, "points", q, 2, err);
        if (st == SL_OK)
            st = sl_yaml_numbers(y, q[0].node, "distance_cm", &p->distance_cm, &nd, err);
        if (st == SL_OK)
            st = sl_yaml_numbers(y, q[1].node, "dose_percent", &p->dose_percent, &nv, err);
        if (st == SL_OK && (nd != nv || nd < 2))
            st = sl_yaml_error(y, k[11].node, err,
                               "%s: points: %zu distances and %zu doses (need the same number, "
                               "at least 2)",
                               what, nd, nv);
        p->n = nd;
        for (size_t i = 0; st == SL_OK && i < nd; i++) {
            if (i && !(p->distance_cm[i] > p->distance_cm[i - 1]))
                st = sl_yaml_error(y, q[0].node, err,
                                   "%s: distance_cm is not increasing at point %zu (%g after %g)",
                                   what, i + 1, p->distance_cm[i], p->distance_cm[i - 1]);
            else if (!(p->dose_percent[i] > 0) || p->dose_percent[i] > 150)
                st = sl_yaml_error(y, q[1].node, err, "%s: dose_percent %g at point %zu is not "
                                                      "plausible",
                                   what, p->dose_percent[i], i + 1);
            else if (p->distance_cm[i] < 0)
                st = sl_yaml_error(y, q[0].node, err, "%s: a negative distance at point %zu",
                                   what, i + 1);
        }
        if (st == SL_OK && (fabs(p->distance_cm[0] - p->fit.range_lo_cm) > 1e-9 ||
                            fabs(p->distance_cm[nd - 1] - p->fit.range_hi_cm) > 1e-9))
            st = sl_yaml_error(y, k[9].node, err,
                               "%s: range_cm does not match the first and last points", what);
        if (st == SL_OK)
            st = check_fit_on_points(y, k[10].node, what, p, err);
    }
    for (size_t j = 0; st == SL_OK && j < idx; j++) {
        const sl_model_profile *o = &m->profiles[j];
        if (fabs(o->energy_mev - p->energy_mev) < 0.01 && strcmp(o->applicator, p->applicator) == 0 &&
            strcmp(o->insert, p->insert) == 0 && fabs(o->depth_cm - p->depth_cm) < 1e-6 &&
            strcmp(o->direction, p->direction) == 0 && fabs(o->tilt_deg - p->tilt_deg) < 1e-6 &&
            fabs(o->ssd_cm - p->ssd_cm) < 1e-6)
            st = sl_yaml_error(y, n, err, "%s: duplicate of profile %zu", what, j + 1);
    }
    return st;
}

static sl_status read_provenance(sl_yaml *y, yaml_node_t *n, sl_provenance *p, sl_error *err)
{
    sl_yaml_field k[] = {{"measurement_set", true, NULL}, {"measurement_set_sha256", true, NULL},
                         {"tool", true, NULL},            {"created", true, NULL},
                         {"measured_date", true, NULL},   {"measured_by", true, NULL},
                         {"detector", true, NULL},        {"reference", true, NULL}};
    char **slots[] = {&p->measurement_set, &p->measurement_set_sha256, &p->tool, &p->created,
                      &p->measured_date, &p->measured_by, &p->detector, &p->reference};
    sl_status st = sl_yaml_fields(y, n, "provenance", k, 8, err);
    for (size_t i = 0; st == SL_OK && i < 8; i++)
        st = sl_yaml_string(y, k[i].node, k[i].key, slots[i], err);
    return st;
}

/* invivo_scales: one entry per energy x applicator. The factor is checked
 * against a plausible range (a factor beyond it is a typing error or a
 * model of another machine, not a bias to correct); the evidence is
 * required so that `model show` and every report can say where it came
 * from. */
static sl_status read_scales(sl_yaml *y, yaml_node_t *n, sl_model *m, sl_error *err)
{
    yaml_node_item_t *items;
    size_t cnt = 0;
    sl_status st = sl_yaml_seq(y, n, "invivo_scales", &items, &cnt, err);
    if (st == SL_OK && cnt == 0)
        return sl_yaml_error(y, n, err, "invivo_scales: the list is empty (leave the key out)");
    if (st == SL_OK) {
        m->scales = calloc(cnt, sizeof *m->scales);
        if (!m->scales)
            return sl_error_set(err, SL_ENOMEM, "out of memory");
    }
    for (size_t i = 0; st == SL_OK && i < cnt; i++) {
        yaml_node_t *e = sl_yaml_item(y, items[i]);
        sl_model_scale *s = &m->scales[i];
        m->nscales = i + 1;
        sl_yaml_field k[] = {{"energy_mev", true, NULL},     {"applicator", true, NULL},
                             {"factor", true, NULL},         {"readings", true, NULL},
                             {"first_date", true, NULL},     {"last_date", true, NULL},
                             {"mean_log_ratio", true, NULL}, {"mean_log_ratio_ci95", true, NULL},
                             {"p_value", true, NULL},        {"source", true, NULL}};
        char what[64];
        snprintf(what, sizeof what, "invivo_scales[%zu]", i);
        st = sl_yaml_fields(y, e, what, k, 10, err);
        if (st == SL_OK)
            st = sl_yaml_number_in(y, k[0].node, "energy_mev", 0.1, 100, &s->energy_mev, err);
        if (st == SL_OK)
            st = sl_yaml_string(y, k[1].node, "applicator", &s->applicator, err);
        if (st == SL_OK)
            st = sl_yaml_number(y, k[2].node, "factor", &s->factor, err);
        if (st == SL_OK && !(s->factor >= SL_SCALE_MIN && s->factor <= SL_SCALE_MAX))
            st = sl_yaml_error(y, k[2].node, err,
                               "%s: factor %g is outside the plausible %g to %g (a scale of "
                               "in-vivo evidence, not a different machine)",
                               what, s->factor, SL_SCALE_MIN, SL_SCALE_MAX);
        if (st == SL_OK)
            st = sl_yaml_int(y, k[3].node, "readings", &s->readings, err);
        if (st == SL_OK && s->readings < 2)
            st = sl_yaml_error(y, k[3].node, err, "%s: readings %d: a scale needs at least 2",
                               what, s->readings);
        if (st == SL_OK)
            st = sl_yaml_string(y, k[4].node, "first_date", &s->first_date, err);
        if (st == SL_OK)
            st = sl_yaml_string(y, k[5].node, "last_date", &s->last_date, err);
        if (st == SL_OK)
            st = sl_yaml_number_in(y, k[6].node, "mean_log_ratio", -5, 5, &s->mean_log_ratio,
                                   err);
        double *ci = NULL;
        size_t nci = 0;
        if (st == SL_OK)
            st = sl_yaml_numbers(y, k[7].node, "mean_log_ratio_ci95", &ci, &nci, err);
        if (st == SL_OK && (nci != 2 || !(ci[0] <= s->mean_log_ratio) ||
                            !(s->mean_log_ratio <= ci[1])))
            st = sl_yaml_error(y, k[7].node, err,
                               "%s: mean_log_ratio_ci95 must be [low, high] around "
                               "mean_log_ratio",
                               what);
        if (st == SL_OK) {
            s->ci_lo = ci[0];
            s->ci_hi = ci[1];
        }
        free(ci);
        if (st == SL_OK)
            st = sl_yaml_number_in(y, k[8].node, "p_value", 0, 1, &s->p_value, err);
        if (st == SL_OK)
            st = sl_yaml_string(y, k[9].node, "source", &s->source, err);
        if (st == SL_OK && !sl_machine_output(&m->machine, s->energy_mev, s->applicator))
            st = sl_yaml_error(y, e, err, "%s: %g MeV, applicator %s is not commissioned", what,
                               s->energy_mev, s->applicator);
        for (size_t j = 0; st == SL_OK && j < i; j++)
            if (m->scales[j].energy_mev == s->energy_mev &&
                strcmp(m->scales[j].applicator, s->applicator) == 0)
                st = sl_yaml_error(y, e, err, "%s: a second scale for %g MeV, applicator %s",
                                   what, s->energy_mev, s->applicator);
    }
    return st;
}

double sl_model_scale_rel_u(const sl_model_scale *s)
{
    return 0.5 * (s->ci_hi - s->ci_lo);
}

const sl_model_scale *sl_model_find_scale(const sl_model *m, double e, const char *app)
{
    for (size_t i = 0; m && app && i < m->nscales; i++)
        if (fabs(m->scales[i].energy_mev - e) < 1e-6 && strcmp(m->scales[i].applicator, app) == 0)
            return &m->scales[i];
    return NULL;
}

/* The root mapping's `format` value, or NULL: looked at before the keys are
 * checked, so that a measurement set handed over as a model file is named as
 * such rather than as a model with unknown keys. */
static const char *root_format(sl_yaml *y)
{
    yaml_node_t *root = sl_yaml_root(y);
    if (!root || root->type != YAML_MAPPING_NODE)
        return NULL;
    for (yaml_node_pair_t *p = root->data.mapping.pairs.start; p < root->data.mapping.pairs.top;
         p++) {
        yaml_node_t *k = yaml_document_get_node(&y->doc, p->key);
        yaml_node_t *v = yaml_document_get_node(&y->doc, p->value);
        if (k && v && k->type == YAML_SCALAR_NODE && v->type == YAML_SCALAR_NODE &&
            strcmp((const char *)k->data.scalar.value, "format") == 0)
            return (const char *)v->data.scalar.value;
    }
    return NULL;
}

static sl_status read_model(sl_yaml *y, sl_model *m, sl_error *err)
{
    const char *fmt = root_format(y);
    if (fmt && strcmp(fmt, "strayline-measurements") == 0)
        return sl_error_set(err, SL_EINPUT,
                            "%s: format: this is a measurement set, not a model file: run "
                            "`strayline fit %s -o MODEL.yaml` to make the model from it",
                            y->file, y->file);
    sl_yaml_field k[] = {{"format", true, NULL},      {"format_version", true, NULL},
                         {"model_version", true, NULL}, {"notice", false, NULL},
                         {"machine", true, NULL},     {"applicators", true, NULL},
                         {"inserts", false, NULL},    {"outputs", true, NULL},
                         {"provenance", true, NULL},  {"profiles", true, NULL},
                         {"invivo_scales", false, NULL}};
    sl_status st = sl_yaml_fields(y, sl_yaml_root(y), "model file", k, 11, err);
    char *format = NULL;
    if (st == SL_OK)
        st = sl_yaml_string(y, k[0].node, "format", &format, err);
    if (st == SL_OK && strcmp(format, SL_MODEL_FORMAT) != 0)
        st = sl_yaml_error(y, k[0].node, err, "format '%s': this is not a strayline model file",
                           format);
    free(format);
    int version = 0;
    if (st == SL_OK)
        st = sl_yaml_int(y, k[1].node, "format_version", &version, err);
    if (st == SL_OK && (version < 1 || version > SL_MODEL_FORMAT_VERSION))
        st = sl_yaml_error(y, k[1].node, err,
                           "format_version %d: this strayline reads versions 1 to %d", version,
                           SL_MODEL_FORMAT_VERSION);
    m->format_version = version;
    if (st == SL_OK)
        st = sl_yaml_string(y, k[2].node, "model_version", &m->model_version, err);
    /* every report and the log trace an estimate to this label */
    if (st == SL_OK && !m->model_version[strspn(m->model_version, " \t")])
        st = sl_yaml_error(y, k[2].node, err,
                           "model_version: empty (every report and the log name the model by "
                           "it: give it a label)");
    if (st == SL_OK && k[3].node)
        st = sl_yaml_string(y, k[3].node, "notice", &m->notice, err);
    if (st == SL_OK)
        st = sl_machine_read(y, k[4].node, k[5].node, k[6].node, k[7].node, &m->machine, err);
    if (st == SL_OK)
        st = read_provenance(y, k[8].node, &m->provenance, err);
    yaml_node_item_t *items;
    size_t n = 0;
    if (st == SL_OK)
        st = sl_yaml_seq(y, k[9].node, "profiles", &items, &n, err);
    if (st == SL_OK && n == 0)
        st = sl_yaml_error(y, k[9].node, err, "profiles: the list is empty");
    if (st == SL_OK) {
        m->profiles = calloc(n, sizeof *m->profiles);
        if (!m->profiles)
            st = sl_error_set(err, SL_ENOMEM, "out of memory");
    }
    for (size_t i = 0; st == SL_OK && i < n; i++) {
        m->nprofiles = i + 1;
        st = read_profile(y, sl_yaml_item(y, items[i]), i, m, err);
    }
    if (st == SL_OK && k[10].node)
        st = read_scales(y, k[10].node, m, err);
    return st;
}

sl_status sl_model_load_buffer(const char *data, size_t size, const char *name, sl_model **out,
                               sl_error *err)
{
    *out = NULL;
    sl_model *m = calloc(1, sizeof *m);
    if (!m)
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    bool ok = true;
    m->source = sl_strdup(name, &ok);
    sl_sha256_buffer(data, size, m->sha256);
    sl_yaml y;
    sl_status st = ok ? sl_yaml_load_buffer(&y, data, size, name, err) : SL_ENOMEM;
    if (st == SL_OK) {
        st = read_model(&y, m, err);
        sl_yaml_free(&y);
    }
    if (st != SL_OK) {
        sl_model_free(m);
        return st;
    }
    *out = m;
    return SL_OK;
}

sl_status sl_model_load(const char *path, sl_model **out, sl_error *err)
{
    char *data;
    size_t size;
    *out = NULL;
    sl_status st = sl_read_file(path, SL_YAML_MAX_BYTES, &data, &size, err);
    if (st != SL_OK)
        return st;
    st = sl_model_load_buffer(data, size, path, out, err);
    free(data);
    return st;
}

/* ------------------------------------------------------------ writing -- */

static void write_fit(sl_yaml_writer *w, const sl_profile_fit *f)
{
    sl_yaml_key(w, "fit");
    sl_yaml_map_begin(w, false);
    sl_yaml_kv_string(w, "form", sl_profile_form_name(f->form));
    sl_yaml_key(w, "parameters");
    sl_yaml_map_begin(w, false);
    for (size_t i = 0; i < f->p; i++)
        sl_yaml_kv_number(w, sl_profile_param_key(i), f->theta[i]);
    sl_yaml_map_end(w);
    sl_yaml_key(w, "covariance");
    sl_yaml_seq_begin(w, false);
    for (size_t i = 0; i < f->p; i++) {
        sl_yaml_seq_begin(w, true);
        for (size_t j = 0; j < f->p; j++)
            sl_yaml_put_number(w, f->covar[i * f->p + j]);
        sl_yaml_seq_end(w);
    }
    sl_yaml_seq_end(w);
    sl_yaml_kv_number(w, "covariance_scale", f->cov_scale);
    sl_yaml_kv_int(w, "n", (long long)f->n);
    sl_yaml_kv_int(w, "dof", (long long)f->dof);
    sl_yaml_kv_number(w, "chi2", f->chi2);
    sl_yaml_kv_number(w, "chi2_reduced", f->chi2_red);
    sl_yaml_kv_number(w, "aicc", f->aicc);
    if (isfinite(f->aicc_other))
        sl_yaml_kv_number(w, "aicc_other", f->aicc_other);
    sl_yaml_kv_number(w, "rms_residual_percent", f->rms_residual_percent);
    sl_yaml_kv_number(w, "max_residual_percent", f->max_residual_percent);
    sl_yaml_kv_number(w, "rms_residual_relative", f->rms_residual_relative);
    sl_yaml_kv_number(w, "max_residual_relative", f->max_residual_relative);
    sl_yaml_kv_number(w, "max_residual_sigma", f->max_residual_sigma);
    sl_yaml_kv_bool(w, "poor", f->poor);
    sl_yaml_map_end(w);
}

sl_status sl_model_write(const sl_model *m, FILE *fp, sl_error *err)
{
    fprintf(fp, "# strayline model file (format %s, version %d); see models/README.md.\n",
            SL_MODEL_FORMAT, SL_MODEL_FORMAT_VERSION);
    if (m->notice)
        fprintf(fp, "# %s\n", m->notice);
    fprintf(fp, "# Written by strayline fit: edit the measurements and refit rather than this "
                "file.\n");
    sl_yaml_writer w;
    if (sl_yaml_writer_open(&w, fp) != SL_OK)
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    sl_yaml_map_begin(&w, false);
    sl_yaml_kv_string(&w, "format", SL_MODEL_FORMAT);
    sl_yaml_kv_int(&w, "format_version", SL_MODEL_FORMAT_VERSION);
    sl_yaml_kv_string(&w, "model_version", m->model_version);
    if (m->notice)
        sl_yaml_kv_string(&w, "notice", m->notice);
    sl_machine_write(&w, &m->machine);
    const sl_provenance *p = &m->provenance;
    sl_yaml_key(&w, "provenance");
    sl_yaml_map_begin(&w, false);
    sl_yaml_kv_string(&w, "measurement_set", p->measurement_set);
    sl_yaml_kv_string(&w, "measurement_set_sha256", p->measurement_set_sha256);
    sl_yaml_kv_string(&w, "tool", p->tool);
    sl_yaml_kv_string(&w, "created", p->created);
    sl_yaml_kv_string(&w, "measured_date", p->measured_date);
    sl_yaml_kv_string(&w, "measured_by", p->measured_by);
    sl_yaml_kv_string(&w, "detector", p->detector);
    sl_yaml_kv_string(&w, "reference", p->reference);
    sl_yaml_map_end(&w);
    sl_yaml_key(&w, "profiles");
    sl_yaml_seq_begin(&w, false);
    for (size_t i = 0; i < m->nprofiles; i++) {
        const sl_model_profile *q = &m->profiles[i];
        sl_yaml_map_begin(&w, false);
        sl_yaml_kv_number(&w, "energy_mev", q->energy_mev);
        sl_yaml_kv_string(&w, "applicator", q->applicator);
        sl_yaml_kv_string(&w, "insert", q->insert);
        sl_yaml_kv_number(&w, "depth_cm", q->depth_cm);
        sl_yaml_kv_string(&w, "direction", q->direction);
        sl_yaml_kv_number(&w, "tilt_deg", q->tilt_deg);
        sl_yaml_kv_number(&w, "ssd_cm", q->ssd_cm);
        sl_yaml_kv_string(&w, "data_file", q->data_file);
        sl_yaml_kv_string(&w, "data_sha256", q->sha256);
        sl_yaml_key(&w, "uncertainty");
        sl_yaml_map_begin(&w, true);
        sl_yaml_kv_number(&w, "relative", q->rel_uncertainty);
        sl_yaml_kv_number(&w, "floor_percent", q->floor_percent);
        sl_yaml_map_end(&w);
        if (q->from_positions) {
            sl_yaml_key(&w, "edge");
            sl_yaml_map_begin(&w, true);
            sl_yaml_kv_number(&w, "width_found_cm", q->width_found_cm);
            if (isfinite(q->width_nominal_cm))
                sl_yaml_kv_number(&w, "width_nominal_cm", q->width_nominal_cm);
            sl_yaml_map_end(&w);
        }
        double range[2] = {q->fit.range_lo_cm, q->fit.range_hi_cm};
        sl_yaml_kv_numbers(&w, "range_cm", range, 2);
        write_fit(&w, &q->fit);
        sl_yaml_key(&w, "points");
        sl_yaml_map_begin(&w, false);
        sl_yaml_kv_numbers(&w, "distance_cm", q->distance_cm, q->n);
        sl_yaml_kv_numbers(&w, "dose_percent", q->dose_percent, q->n);
        sl_yaml_map_end(&w);
        sl_yaml_map_end(&w);
    }
    sl_yaml_seq_end(&w);
    if (m->nscales) {
        sl_yaml_key(&w, "invivo_scales");
        sl_yaml_seq_begin(&w, false);
        for (size_t i = 0; i < m->nscales; i++) {
            const sl_model_scale *s = &m->scales[i];
            sl_yaml_map_begin(&w, false);
            sl_yaml_kv_number(&w, "energy_mev", s->energy_mev);
            sl_yaml_kv_string(&w, "applicator", s->applicator);
            sl_yaml_kv_number(&w, "factor", s->factor);
            sl_yaml_kv_int(&w, "readings", s->readings);
            sl_yaml_kv_string(&w, "first_date", s->first_date);
            sl_yaml_kv_string(&w, "last_date", s->last_date);
            sl_yaml_kv_number(&w, "mean_log_ratio", s->mean_log_ratio);
            double ci[2] = {s->ci_lo, s->ci_hi};
            sl_yaml_kv_numbers(&w, "mean_log_ratio_ci95", ci, 2);
            sl_yaml_kv_number(&w, "p_value", s->p_value);
            sl_yaml_kv_string(&w, "source", s->source);
            sl_yaml_map_end(&w);
        }
        sl_yaml_seq_end(&w);
    }
    sl_yaml_map_end(&w);
    return sl_yaml_writer_close(&w, err);
}
