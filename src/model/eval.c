/*
 * Model evaluation (see include/strayline/model.h for the rules).
 *
 * A curve set gathers the profiles of one energy, applicator and insert by
 * depth; several directions measured at one depth are averaged (in log dose)
 * and their spread counts as uncertainty. The measured points of each
 * profile are interpolated with GSL's Steffen spline of log dose, which is
 * monotone between points and never overshoots.
 */
#include "strayline/model.h"
#include "strayline/util.h"

#include <gsl/gsl_interp.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

typedef struct curve {
    const sl_model_profile *prof;
    gsl_interp *interp;   /* Steffen spline of ln(dose) against distance */
    double *logdose;
} curve;

typedef struct depth_group {
    double depth_cm;
    size_t ncurves;
    curve *curves;
} depth_group;

struct sl_curve_set {
    size_t ngroups;
    depth_group *groups;
    double *depths;
    double range_lo, range_hi; /* common measured range */
};

const char *sl_model_flag_text(unsigned flag)
{
    switch (flag) {
    case SL_MF_IN_FIELD: return "in field: the out-of-field model does not apply";
    case SL_MF_DEPTH_OUTSIDE: return "depth outside the commissioned depths (nearest depth used)";
    case SL_MF_EXTRAPOLATED: return "beyond the measured distances (extrapolated)";
    case SL_MF_OPEN_FOR_CUTOUT:
        return "cutout not commissioned: open-applicator profiles used (not known to be "
               "conservative)";
    case SL_MF_POINTS_MODE: return "measured points interpolated (no fitted form)";
    }
    return "unknown flag";
}

void sl_curve_set_free(sl_curve_set *c)
{
    if (!c)
        return;
    for (size_t g = 0; g < c->ngroups; g++) {
        for (size_t k = 0; k < c->groups[g].ncurves; k++) {
            if (c->groups[g].curves[k].interp)
                gsl_interp_free(c->groups[g].curves[k].interp);
            free(c->groups[g].curves[k].logdose);
        }
        free(c->groups[g].curves);
    }
    free(c->groups);
    free(c->depths);
    free(c);
}

static int cmp_prof_depth(const void *a, const void *b)
{
    double x = (*(const sl_model_profile *const *)a)->depth_cm;
    double y = (*(const sl_model_profile *const *)b)->depth_cm;
    return x < y ? -1 : x > y;
}

static bool matches(const sl_model_profile *p, double e, const char *app, const char *ins)
{
    return fabs(p->energy_mev - e) < 0.01 && strcmp(p->applicator, app) == 0 &&
           strcmp(p->insert, ins) == 0;
}

static sl_status not_commissioned(const sl_model *m, double e, const char *app, sl_error *err)
{
    char list[700] = "";
    for (size_t i = 0; i < m->machine.noutputs; i++) {
        const sl_output_spec *o = &m->machine.outputs[i];
        bool has = false;
        for (size_t k = 0; k < m->nprofiles && !has; k++)
            has = fabs(m->profiles[k].energy_mev - o->energy_mev) < 0.01 &&
                  strcmp(m->profiles[k].applicator, o->applicator) == 0;
        if (!has)
            continue;
        char item[64];
        snprintf(item, sizeof item, "%s%g MeV/%s", list[0] ? ", " : "", o->energy_mev,
                 o->applicator);
        strncat(list, item, sizeof list - strlen(list) - 1);
    }
    return sl_error_set(err, SL_EINPUT,
                        "%s: %g MeV with applicator '%s' is not commissioned (no interpolation "
                        "across energies or applicators); commissioned: %s",
                        m->source ? m->source : "model", e, app ? app : "(none)", list);
}

sl_status sl_model_select(const sl_model *m, double e, const char *app, const char *insert,
                          sl_curve_set **out, unsigned *flags, sl_error *err)
{
    *out = NULL;
    *flags = 0;
    sl_gsl_quiet();
    if (!app)
        return not_commissioned(m, e, app, err);
    const char *ins = insert ? insert : SL_INSERT_OPEN;
    size_t n = 0;
    for (size_t i = 0; i < m->nprofiles; i++)
        n += matches(&m->profiles[i], e, app, ins);
    if (n == 0 && strcmp(ins, SL_INSERT_OPEN) != 0) {
        ins = SL_INSERT_OPEN;
        *flags |= SL_MF_OPEN_FOR_CUTOUT;
        for (size_t i = 0; i < m->nprofiles; i++)
            n += matches(&m->profiles[i], e, app, ins);
    }
    if (n == 0)
        return not_commissioned(m, e, app, err);
    const sl_model_profile **sel = malloc(n * sizeof *sel);
    sl_curve_set *c = calloc(1, sizeof *c);
    if (!sel || !c) {
        free(sel);
        free(c);
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    }
    size_t k = 0;
    for (size_t i = 0; i < m->nprofiles; i++) {
        if (matches(&m->profiles[i], e, app, ins))
            sel[k++] = &m->profiles[i];
    }
    qsort(sel, n, sizeof *sel, cmp_prof_depth);
    c->groups = calloc(n, sizeof *c->groups);
    c->depths = calloc(n, sizeof *c->depths);
    sl_status st = c->groups && c->depths ? SL_OK : SL_ENOMEM;
    c->range_lo = -INFINITY;
    c->range_hi = INFINITY;
    for (size_t i = 0; st == SL_OK && i < n; i++) {
        depth_group *g = c->ngroups ? &c->groups[c->ngroups - 1] : NULL;
        if (!g || fabs(sel[i]->depth_cm - g->depth_cm) > 1e-6) {
            g = &c->groups[c->ngroups++];
            g->depth_cm = sel[i]->depth_cm;
            g->curves = calloc(n, sizeof *g->curves);
            if (!g->curves) {
                st = SL_ENOMEM;
                break;
            }
            c->depths[c->ngroups - 1] = g->depth_cm;
        }
        curve *cv = &g->curves[g->ncurves++];
        cv->prof = sel[i];
        c->range_lo = fmax(c->range_lo, sel[i]->fit.range_lo_cm);
        c->range_hi = fmin(c->range_hi, sel[i]->fit.range_hi_cm);
        size_t np = sel[i]->n;
        cv->logdose = malloc(np * sizeof *cv->logdose);
        cv->interp = np >= 3 ? gsl_interp_alloc(gsl_interp_steffen, np)
                             : gsl_interp_alloc(gsl_interp_linear, np);
        if (!cv->logdose || !cv->interp) {
            st = SL_ENOMEM;
            break;
        }
        for (size_t j = 0; j < np; j++)
            cv->logdose[j] = log(sel[i]->dose_percent[j]);
        if (gsl_interp_init(cv->interp, sel[i]->distance_cm, cv->logdose, np) != 0)
            st = SL_EINPUT;
    }
    free(sel);
    if (st != SL_OK) {
        sl_curve_set_free(c);
        return st == SL_ENOMEM ? sl_error_set(err, SL_ENOMEM, "out of memory")
                               : sl_error_set(err, SL_EINPUT,
                                              "%s: a profile's points cannot be interpolated",
                                              m->source ? m->source : "model");
    }
    *out = c;
    return SL_OK;
}

size_t sl_curves_depths(const sl_curve_set *c, const double **depths)
{
    *depths = c->depths;
    return c->ngroups;
}

void sl_curves_range(const sl_curve_set *c, double *lo, double *hi)
{
    *lo = c->range_lo;
    *hi = c->range_hi;
}

typedef struct point_value {
    double v, u_fit, u_meas, u_extrap, e_frac;
    bool extrapolated;
} point_value;

/* One profile at one distance. */
static point_value curve_value(const curve *cv, double d, sl_eval_mode mode)
{
    const sl_model_profile *p = cv->prof;
    point_value r = {0};
    double ufit, el, ph;
    double fit = sl_profile_fit_eval(&p->fit, d, &ufit);
    sl_profile_value(p->fit.form, p->fit.theta, d, NULL, &el, &ph);
    r.e_frac = el + ph > 0 ? el / (el + ph) : 0;
    double lo = p->distance_cm[0], hi = p->distance_cm[p->n - 1];
    r.extrapolated = d > hi + 1e-9 || d < lo - 1e-9;
    if (mode == SL_EVAL_POINTS) {
        if (d >= lo && d <= hi) {
            r.v = exp(gsl_interp_eval(cv->interp, p->distance_cm, cv->logdose, d, NULL));
        } else {
            /* beyond the points: the fitted form, scaled to meet the end point */
            double end = d > hi ? hi : lo;
            double at_end = sl_profile_fit_eval(&p->fit, end, NULL);
            double meas_end = p->dose_percent[d > hi ? p->n - 1 : 0];
            r.v = fit * meas_end / at_end;
        }
        r.u_fit = ufit * (fit > 0 ? r.v / fit : 1);
    } else {
        r.v = fit;
        r.u_fit = ufit;
    }
    double rel = p->rel_uncertainty * r.v;
    r.u_meas = sqrt(rel * rel + p->floor_percent * p->floor_percent);
    if (d > hi)
        r.u_extrap = SL_EXTRAPOLATION_PER_CM * (d - hi) * r.v;
    return r;
}

/* The curves measured at one depth, averaged over directions. */
static point_value group_value(const depth_group *g, double d, sl_eval_mode mode,
                               double *spread)
{
    point_value acc = {0};
    double lsum = 0, vmin = INFINITY, vmax = -INFINITY;
    for (size_t k = 0; k < g->ncurves; k++) {
        point_value r = curve_value(&g->curves[k], d, mode);
        lsum += log(r.v);
        vmin = fmin(vmin, r.v);
        vmax = fmax(vmax, r.v);
        acc.u_fit += r.u_fit;
        acc.u_meas += r.u_meas;
        acc.u_extrap += r.u_extrap;
        acc.e_frac += r.e_frac;
        acc.extrapolated |= r.extrapolated;
    }
    double m = (double)g->ncurves;
    acc.v = exp(lsum / m);
    acc.u_fit /= m;
    acc.u_meas /= m;
    acc.u_extrap /= m;
    acc.e_frac /= m;
    *spread = g->ncurves > 1 ? 0.5 * (vmax - vmin) : 0;
    return acc;
}

void sl_curves_eval(const sl_curve_set *c, double depth, double d, sl_eval_mode mode,
                    double electron_t, sl_model_value *out)
{
    memset(out, 0, sizeof *out);
    out->depth_used_cm = depth;
    if (mode == SL_EVAL_POINTS)
        out->flags |= SL_MF_POINTS_MODE;
    if (isnan(depth) || isnan(d)) {
        /* no value for an unknown place; the callers check before asking */
        out->percent = out->u_percent = out->u_fit = out->u_meas = out->u_interp = NAN;
        out->u_extrap = out->electron_percent = out->photon_percent = NAN;
        return;
    }
    if (!(d >= 0)) {
        out->flags |= SL_MF_IN_FIELD;
        out->percent = out->u_percent = out->u_fit = out->u_meas = out->u_interp = NAN;
        out->u_extrap = out->electron_percent = out->photon_percent = NAN;
        return;
    }
    size_t g0 = 0, g1 = 0;
    double w = 0;
    if (depth <= c->depths[0]) {
        g0 = g1 = 0;
        if (depth < c->depths[0] - 1e-9)
            out->flags |= SL_MF_DEPTH_OUTSIDE;
        out->depth_used_cm = c->depths[0];
    } else if (depth >= c->depths[c->ngroups - 1]) {
        g0 = g1 = c->ngroups - 1;
        if (depth > c->depths[c->ngroups - 1] + 1e-9)
            out->flags |= SL_MF_DEPTH_OUTSIDE;
        out->depth_used_cm = c->depths[c->ngroups - 1];
    } else {
        while (g1 < c->ngroups && c->depths[g1] < depth)
            g1++;
        g0 = g1 - 1;
        w = (depth - c->depths[g0]) / (c->depths[g1] - c->depths[g0]);
    }
    double s0, s1;
    point_value a = group_value(&c->groups[g0], d, mode, &s0);
    point_value b = g1 == g0 ? a : group_value(&c->groups[g1], d, mode, &s1);
    if (g1 == g0)
        s1 = s0;
    double v = exp((1 - w) * log(a.v) + w * log(b.v));
    /* relative uncertainties interpolate like the values */
    double rf = (1 - w) * a.u_fit / a.v + w * b.u_fit / b.v;
    double rm = (1 - w) * a.u_meas / a.v + w * b.u_meas / b.v;
    double rx = (1 - w) * a.u_extrap / a.v + w * b.u_extrap / b.v;
    double rs = (1 - w) * s0 / a.v + w * s1 / b.v;
    double between = w * (1 - w) * fabs(b.v - a.v);
    double efrac = (1 - w) * a.e_frac + w * b.e_frac;
    if (a.extrapolated || b.extrapolated)
        out->flags |= SL_MF_EXTRAPOLATED;
    /* a what-if shield takes off part of the electron share only */
    double t = electron_t >= 0 && electron_t <= 1 ? electron_t : 1;
    double scale = efrac * t + (1 - efrac);
    out->percent = v * scale;
    out->electron_percent = v * efrac * t;
    out->photon_percent = v * (1 - efrac);
    out->u_fit = rf * out->percent;
    out->u_meas = rm * out->percent;
    out->u_extrap = rx * out->percent;
    out->u_interp = sqrt(between * between + (rs * v) * (rs * v)) * scale;
    out->u_percent = sqrt(out->u_fit * out->u_fit + out->u_meas * out->u_meas +
                          out->u_interp * out->u_interp + out->u_extrap * out->u_extrap);
}

sl_status sl_model_eval(const sl_model *m, double energy_mev, const char *applicator,
                        const char *insert, double depth_cm, double distance_cm,
                        sl_eval_mode mode, sl_model_value *out, sl_error *err)
{
    sl_curve_set *c;
    unsigned flags;
    sl_status st = sl_model_select(m, energy_mev, applicator, insert, &c, &flags, err);
    if (st != SL_OK)
        return st;
    sl_curves_eval(c, depth_cm, distance_cm, mode, 1.0, out);
    out->flags |= flags;
    sl_curve_set_free(c);
    return SL_OK;
}
