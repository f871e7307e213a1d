/*
 * Model evaluation (see include/strayline/model.h for the rules).
 *
 * A curve set gathers the profiles of one energy, applicator and insert by
 * depth, and within a depth by direction from the central axis. The
 * measured points of each profile are interpolated with GSL's Steffen spline
 * of log dose, which is monotone between points and never overshoots. The
 * stand-in for an uncommissioned cutout is the open applicator's curve set
 * with "members": the commissioned inserts of the same energy and
 * applicator, each evaluated from the cutout's edge and scaled to the open
 * output; the largest candidate wins, so the stand-in never reads below an
 * insert that was measured on this applicator.
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
    double angle_deg;     /* 0 crossplane, 45 diagonal, 90 inplane */
    gsl_interp *interp;   /* Steffen spline of ln(dose) against distance */
    double *logdose;
} curve;

typedef struct depth_group {
    double depth_cm;
    size_t ncurves;
    curve *curves;
} depth_group;

typedef struct member {
    sl_curve_set *set;    /* a commissioned insert's curves */
    double scale;         /* to percent of the open field's central-axis maximum */
} member;

struct sl_curve_set {
    size_t ngroups;
    depth_group *groups;
    double *depths;
    double range_lo, range_hi; /* nearest and farthest distance measured */
    const sl_transfer *transfer;
    bool standin;         /* open curves standing in for an uncommissioned cutout */
    size_t nmembers;
    member *members;
};

const char *sl_model_flag_text(unsigned flag)
{
    switch (flag) {
    case SL_MF_IN_FIELD: return "in field: the out-of-field model does not apply";
    case SL_MF_DEPTH_OUTSIDE: return "depth outside the commissioned depths (nearest depth used)";
    case SL_MF_EXTRAPOLATED:
        return "beyond the measured distances (extrapolated, held at least at the farthest "
               "measured level)";
    case SL_MF_OPEN_FOR_CUTOUT:
        return "cutout not commissioned: the largest of the open profiles from the cutout's "
               "and the applicator's edge and the commissioned inserts is used";
    case SL_MF_POINTS_MODE: return "measured points interpolated (no fitted form)";
    case SL_MF_POOR_FIT: return "a profile used has a poor fit (uncertainty widened)";
    case SL_MF_NEAR_EDGE:
        return "near the field edge: the planning system's dose is the reference here";
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
    for (size_t k = 0; k < c->nmembers; k++)
        sl_curve_set_free(c->members[k].set);
    free(c->members);
    free(c);
}

static double direction_angle(const char *dir)
{
    return strcmp(dir, "inplane") == 0 ? 90.0 : strcmp(dir, "diagonal") == 0 ? 45.0 : 0.0;
}

static int cmp_prof_depth(const void *a, const void *b)
{
    const sl_model_profile *p = *(const sl_model_profile *const *)a;
    const sl_model_profile *q = *(const sl_model_profile *const *)b;
    if (p->depth_cm != q->depth_cm)
        return p->depth_cm < q->depth_cm ? -1 : 1;
    double x = direction_angle(p->direction), y = direction_angle(q->direction);
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

/* The curves of exactly this energy, applicator and insert (n of them). */
static sl_status build_set(const sl_model *m, double e, const char *app, const char *ins,
                           size_t n, sl_curve_set **out, sl_error *err)
{
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
    c->range_lo = INFINITY;
    c->range_hi = -INFINITY;
    c->transfer = &m->machine.transfer;
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
        cv->angle_deg = direction_angle(sel[i]->direction);
        c->range_lo = fmin(c->range_lo, sel[i]->fit.range_lo_cm);
        c->range_hi = fmax(c->range_hi, sel[i]->fit.range_hi_cm);
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

static size_t count_matches(const sl_model *m, double e, const char *app, const char *ins)
{
    size_t n = 0;
    for (size_t i = 0; i < m->nprofiles; i++)
        n += matches(&m->profiles[i], e, app, ins);
    return n;
}

/* The scale that puts an insert's profiles on the open output: its cutout
 * factor when they are relative to its own central-axis maximum (1 when the
 * model has no factor, the higher guess as inserts lower the output), 1 when
 * they are relative to the open field's already. */
static double insert_scale(const sl_model *m, double e, const char *app, const char *ins)
{
    const sl_insert_spec *spec = sl_machine_insert(&m->machine, app, ins);
    if (spec && spec->relative_to == SL_REL_OPEN_CAX)
        return 1.0;
    const sl_output_spec *o = sl_machine_output(&m->machine, e, app);
    for (size_t k = 0; o && k < o->nfactors; k++) {
        if (strcmp(o->factors[k].insert, ins) == 0)
            return o->factors[k].factor;
    }
    return 1.0;
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
    size_t n = count_matches(m, e, app, ins);
    if (n > 0)
        return build_set(m, e, app, ins, n, out, err);
    if (strcmp(ins, SL_INSERT_OPEN) == 0 || (n = count_matches(m, e, app, SL_INSERT_OPEN)) == 0)
        return not_commissioned(m, e, app, err);
    /* the stand-in: open curves, with the applicator's commissioned inserts */
    *flags |= SL_MF_OPEN_FOR_CUTOUT;
    sl_curve_set *c;
    sl_status st = build_set(m, e, app, SL_INSERT_OPEN, n, &c, err);
    if (st != SL_OK)
        return st;
    c->standin = true;
    c->members = calloc(m->machine.ninserts ? m->machine.ninserts : 1, sizeof *c->members);
    if (!c->members) {
        sl_curve_set_free(c);
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    }
    for (size_t i = 0; i < m->machine.ninserts; i++) {
        const sl_insert_spec *s = &m->machine.inserts[i];
        size_t k = strcmp(s->applicator, app) == 0 ? count_matches(m, e, app, s->id) : 0;
        if (k == 0)
            continue;
        member *mb = &c->members[c->nmembers];
        st = build_set(m, e, app, s->id, k, &mb->set, err);
        if (st != SL_OK) {
            sl_curve_set_free(c);
            return st;
        }
        mb->scale = insert_scale(m, e, app, s->id);
        c->nmembers++;
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
    bool extrapolated, poor;
} point_value;

/* The level a profile keeps beyond its farthest measured point: the larger
 * of its fit there and the mean of its last three measured doses. */
static double measured_floor(const sl_model_profile *p)
{
    size_t k = p->n < 3 ? p->n : 3;
    double sum = 0;
    for (size_t i = p->n - k; i < p->n; i++)
        sum += p->dose_percent[i];
    return fmax(sum / (double)k, sl_profile_fit_eval(&p->fit, p->distance_cm[p->n - 1], NULL));
}

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
    if (d > hi) {
        /* far out, head leakage flattens the curve: an exponential tail
         * would under-read, so the measured floor holds (all photons) */
        double floor = measured_floor(p);
        if (!(r.v >= floor)) {
            /* the fit's relative uncertainty where it was last measured */
            double uhi, vhi = sl_profile_fit_eval(&p->fit, hi, &uhi);
            r.u_fit = vhi > 0 ? uhi / vhi * floor : 0;
            r.e_frac = r.v > 0 ? r.e_frac * r.v / floor : 0;
            r.v = floor;
        }
        r.u_extrap = SL_EXTRAPOLATION_PER_CM * (d - hi) * r.v;
    }
    double rel = p->rel_uncertainty * r.v;
    r.u_meas = sqrt(rel * rel + p->floor_percent * p->floor_percent);
    if (p->fit.poor) {
        double wide = p->fit.max_residual_relative * r.v;
        r.u_fit = sqrt(r.u_fit * r.u_fit + wide * wide);
        r.poor = true;
    }
    return r;
}

/* Log-linear blend of two values with weight w on b; uncertainties blend
 * relatively, like the values. */
static point_value blend(point_value a, point_value b, double w)
{
    if (w <= 0)
        return a;
    if (w >= 1)
        return b;
    point_value r;
    r.v = exp((1 - w) * log(a.v) + w * log(b.v));
    r.u_fit = ((1 - w) * a.u_fit / a.v + w * b.u_fit / b.v) * r.v;
    r.u_meas = ((1 - w) * a.u_meas / a.v + w * b.u_meas / b.v) * r.v;
    r.u_extrap = ((1 - w) * a.u_extrap / a.v + w * b.u_extrap / b.v) * r.v;
    r.e_frac = (1 - w) * a.e_frac + w * b.e_frac;
    r.extrapolated = a.extrapolated || b.extrapolated;
    r.poor = a.poor || b.poor;
    return r;
}

/* The curves measured at one depth, at a direction: interpolated between the
 * two measured directions around it (the nearest beyond the measured ones),
 * or the highest when the direction is unknown. *between receives the
 * interpolation spread w (1 - w) |b - a|. */
static point_value group_value(const depth_group *g, double d, double angle, sl_eval_mode mode,
                               double *between)
{
    *between = 0;
    if (g->ncurves == 1)
        return curve_value(&g->curves[0], d, mode);
    if (isnan(angle)) {
        point_value best = curve_value(&g->curves[0], d, mode);
        for (size_t k = 1; k < g->ncurves; k++) {
            point_value r = curve_value(&g->curves[k], d, mode);
            if (r.v > best.v)
                best = r;
        }
        return best;
    }
    /* curves are sorted by direction angle */
    size_t k1 = 0;
    while (k1 < g->ncurves && g->curves[k1].angle_deg < angle)
        k1++;
    if (k1 == 0)
        return curve_value(&g->curves[0], d, mode);
    if (k1 == g->ncurves)
        return curve_value(&g->curves[g->ncurves - 1], d, mode);
    const curve *c0 = &g->curves[k1 - 1], *c1 = &g->curves[k1];
    double w = (angle - c0->angle_deg) / (c1->angle_deg - c0->angle_deg);
    point_value a = curve_value(c0, d, mode), b = curve_value(c1, d, mode);
    point_value r = blend(a, b, w);
    /* a profile whose measured range ends before d counts only when it has weight */
    r.extrapolated = (w < 1 && a.extrapolated) || (w > 0 && b.extrapolated);
    *between = w * (1 - w) * fabs(b.v - a.v);
    return r;
}

static void set_nan(sl_model_value *out)
{
    out->percent = out->u_percent = out->u_fit = out->u_meas = out->u_interp = NAN;
    out->u_extrap = out->u_standin = out->u_transfer = NAN;
    out->electron_percent = out->photon_percent = NAN;
}

/* One curve set (no members) at one distance. */
static void eval_set(const sl_curve_set *c, double depth, double d, double angle,
                     sl_eval_mode mode, double electron_t, sl_model_value *out)
{
    size_t g0 = 0, g1 = 0;
    double w = 0;
    out->depth_used_cm = depth;
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
    double s0, s1 = 0;
    point_value a = group_value(&c->groups[g0], d, angle, mode, &s0);
    point_value b = g1 == g0 ? a : group_value(&c->groups[g1], d, angle, mode, &s1);
    if (g1 == g0)
        s1 = s0;
    point_value r = blend(a, b, w);
    double rs = (1 - w) * s0 / a.v + w * s1 / b.v;
    double between = w * (1 - w) * fabs(b.v - a.v);
    if (r.extrapolated)
        out->flags |= SL_MF_EXTRAPOLATED;
    if (r.poor)
        out->flags |= SL_MF_POOR_FIT;
    /* a what-if shield takes off part of the electron share only */
    double t = electron_t >= 0 && electron_t <= 1 ? electron_t : 1;
    double scale = r.e_frac * t + (1 - r.e_frac);
    out->percent = r.v * scale;
    out->electron_percent = r.v * r.e_frac * t;
    out->photon_percent = r.v * (1 - r.e_frac);
    out->u_fit = r.u_fit / r.v * out->percent;
    out->u_meas = r.u_meas / r.v * out->percent;
    out->u_extrap = r.u_extrap / r.v * out->percent;
    out->u_interp = sqrt(between * between + (rs * r.v) * (rs * r.v)) * scale;
}

static void combine(const sl_curve_set *c, double d, sl_model_value *out)
{
    double rel = sl_transfer_relative(c->transfer, d);
    out->u_transfer = rel * out->percent;
    out->u_percent = sqrt(out->u_fit * out->u_fit + out->u_meas * out->u_meas +
                          out->u_interp * out->u_interp + out->u_extrap * out->u_extrap +
                          out->u_standin * out->u_standin + out->u_transfer * out->u_transfer);
}

static void scale_value(sl_model_value *v, double k)
{
    v->percent *= k;
    v->electron_percent *= k;
    v->photon_percent *= k;
    v->u_fit *= k;
    v->u_meas *= k;
    v->u_interp *= k;
    v->u_extrap *= k;
}

void sl_curves_eval_query(const sl_curve_set *c, const sl_eval_query *q, sl_model_value *out)
{
    memset(out, 0, sizeof *out);
    double depth = q->depth_cm, d = q->distance_cm;
    out->depth_used_cm = depth;
    if (q->mode == SL_EVAL_POINTS)
        out->flags |= SL_MF_POINTS_MODE;
    if (isnan(depth) || isnan(d)) {
        /* no value for an unknown place; the callers check before asking */
        set_nan(out);
        return;
    }
    if (!(d >= 0)) {
        out->flags |= SL_MF_IN_FIELD;
        set_nan(out);
        return;
    }
    eval_set(c, depth, d, q->angle_deg, q->mode, q->electron_t, out);
    if (c->standin) {
        /* the largest candidate; the flags of every candidate are kept */
        double lo = out->percent;
        sl_model_value cand;
        if (isfinite(q->app_distance_cm) && q->app_distance_cm >= 0) {
            memset(&cand, 0, sizeof cand);
            eval_set(c, depth, q->app_distance_cm, q->angle_deg, q->mode, q->electron_t, &cand);
            cand.flags |= out->flags;
            out->flags = cand.flags;
            lo = fmin(lo, cand.percent);
            if (cand.percent > out->percent)
                *out = cand;
        }
        for (size_t k = 0; k < c->nmembers; k++) {
            memset(&cand, 0, sizeof cand);
            eval_set(c->members[k].set, depth, d, q->angle_deg, q->mode, q->electron_t, &cand);
            scale_value(&cand, c->members[k].scale);
            cand.flags |= out->flags;
            out->flags = cand.flags;
            lo = fmin(lo, cand.percent);
            if (cand.percent > out->percent)
                *out = cand;
        }
        out->u_standin = 0.5 * (out->percent - lo);
        out->flags |= SL_MF_OPEN_FOR_CUTOUT;
    }
    combine(c, d, out);
}

void sl_curves_eval(const sl_curve_set *c, double depth, double d, sl_eval_mode mode,
                    double electron_t, sl_model_value *out)
{
    sl_eval_query q = {depth, d, NAN, NAN, mode, electron_t};
    sl_curves_eval_query(c, &q, out);
}

sl_status sl_model_eval_query(const sl_model *m, double energy_mev, const char *applicator,
                              const char *insert, const sl_eval_query *q, sl_model_value *out,
                              sl_error *err)
{
    sl_curve_set *c;
    unsigned flags;
    sl_status st = sl_model_select(m, energy_mev, applicator, insert, &c, &flags, err);
    if (st != SL_OK)
        return st;
    sl_curves_eval_query(c, q, out);
    out->flags |= flags;
    sl_curve_set_free(c);
    return SL_OK;
}

sl_status sl_model_eval(const sl_model *m, double energy_mev, const char *applicator,
                        const char *insert, double depth_cm, double distance_cm,
                        sl_eval_mode mode, sl_model_value *out, sl_error *err)
{
    sl_eval_query q = {depth_cm, distance_cm, NAN, NAN, mode, 1.0};
    return sl_model_eval_query(m, energy_mev, applicator, insert, &q, out, err);
}
