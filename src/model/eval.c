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
 *
 * The estimate evaluates a set three times at every sample of every organ
 * and beam, so what does not depend on the query (each curve's fit at its
 * ends and its measured floor, each SSD's layers by tilt) is computed when
 * the set is built, and the dose alone (sl_curves_eval_percent) takes a
 * path of its own, the same arithmetic on the dose without the uncertainty
 * components, the flags and the copies of whole values; both leave every
 * number bitwise as it was. The setup shift's two neighbours share one walk
 * and, on a set prepared for the shift, the profiles' exponentials: the
 * nearer distance's are the farther's times a factor fixed per profile,
 * which moves that one number by rounding alone (within 1e-13 relative)
 * and took a quarter of the estimate's exponentials away. For a stand-in,
 * whose candidates the full evaluation would all evaluate in full to keep
 * the largest, the lean walk takes the query's own distance as well and
 * picks the candidate (sl_curves_eval_query_shift): only that one is
 * evaluated in full, and the others give their flags alone (set_flags).
 * On a prepared set that third distance's exponentials come from the
 * farther neighbour's too, so that the spread of the candidates (the
 * stand-in's uncertainty) may move by rounding alone, within 1e-13 of the
 * dose; the dose is the chosen candidate's full evaluation.
 * Beyond a profile's last measured distance the measured level holds, and
 * nearer the edge than its first the measured rise goes on from the first
 * level (curve_value, curve_finish).
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
    /* what every evaluation beyond the measured points needs, fixed by the
     * profile: computed once here rather than at every sample */
    double fit_lo, fit_hi; /* the fit at the nearest and the farthest measured distance */
    double u_lo, u_hi;     /* the fit's standard uncertainty there */
    double floor;          /* the level held beyond the farthest (measured_floor) */
    double near_floor;     /* the level held nearer the edge than the nearest measured
                              distance: the larger of the fit and the dose measured there */
    double near_rise;      /* log rise per cm toward the edge from there: of the value
                              held (near_level) and of its extrapolation component */
    double shift_k[2];     /* decay factors over twice the prepared setup shift */
    double shift_kh[2];    /* and over the shift */
    double shift_gk;       /* the bump's factor over the shift (sl_profile_shift_factors) */
    /* the covariance's pair sums (sl_profile_fit_sym) for the full
     * evaluation, last: the lean path does not read them */
    double sym[SL_PROFILE_MAX_PARAMS * SL_PROFILE_MAX_PARAMS];
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

typedef struct layer {
    double tilt_deg, ssd_cm;
    sl_curve_set *set;    /* the profiles of one tilt and SSD */
} layer;

/* The layers of one commissioned SSD by increasing tilt, gathered once when
 * the set is built: every evaluation between tilts needs them. */
typedef struct ssd_row {
    size_t n;
    double *tilts;
    const sl_curve_set **sets;
} ssd_row;

struct sl_curve_set {
    size_t ngroups;
    depth_group *groups;
    double *depths;
    double range_lo, range_hi; /* nearest and farthest distance measured */
    const sl_transfer *transfer;
    const sl_model_scale *scale; /* in-vivo scale of this energy and applicator, or NULL */
    bool standin;         /* open curves standing in for an uncommissioned cutout */
    size_t nmembers;
    member *members;
    /* tilts and SSDs: a set of one (tilt, SSD) holds its groups itself;
     * a set of several holds one flat set a layer, and no groups */
    double nominal_ssd_cm;
    size_t ndepths;       /* of depths: the groups', or the reference layer's */
    size_t nlayers;
    layer *layers;
    ssd_row *rows;        /* one a SSD of ssds, when there are layers */
    size_t ntilts, nssds;
    double *tilts, *ssds;  /* distinct, increasing */
    double shift_cm;      /* the setup shift prepared for (sl_curves_prepare_shift), or 0 */
};

const char *sl_model_flag_text(unsigned flag)
{
    switch (flag) {
    case SL_MF_IN_FIELD: return "in field: the out-of-field model does not apply";
    case SL_MF_DEPTH_OUTSIDE: return "depth outside the commissioned depths (nearest depth used)";
    case SL_MF_EXTRAPOLATED:
        return "outside the measured distances (extrapolated: beyond them held at least at "
               "the farthest measured level, nearer the edge rising on from the first at the "
               "measured rise)";
    case SL_MF_OPEN_FOR_CUTOUT:
        return "cutout not commissioned: the largest of the open profiles from the cutout's "
               "and the applicator's edge and the commissioned inserts is used";
    case SL_MF_POINTS_MODE: return "measured points interpolated (no fitted form)";
    case SL_MF_POOR_FIT: return "a profile used has a poor fit (uncertainty widened)";
    case SL_MF_NEAR_EDGE:
        return "near the field edge: the planning system's dose is the reference here";
    case SL_MF_TILT_OUTSIDE:
        return "tilt not commissioned: beyond the commissioned beam tilts (nearest used, "
               "uncertainty widened)";
    case SL_MF_SSD_OUTSIDE:
        return "SSD not commissioned: beyond the commissioned SSDs (nearest used, uncertainty "
               "widened; never below the nominal-SSD estimate at an extended SSD)";
    case SL_MF_POINT_REACH:
        return "given as a point: the upper bound covers an organ of its kind reaching nearer "
               "the field from that point (point reach)";
    case SL_MF_INVIVO_SCALED:
        return "scaled by in-vivo evidence: the model's dose times the in-vivo scale factor of "
               "this energy and applicator (model file invivo_scales; upper bound never below "
               "the unscaled estimate)";
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
    for (size_t k = 0; k < c->nlayers; k++)
        sl_curve_set_free(c->layers[k].set);
    free(c->layers);
    for (size_t k = 0; c->rows && k < c->nssds; k++) {
        free(c->rows[k].tilts);
        free(c->rows[k].sets);
    }
    free(c->rows);
    free(c->tilts);
    free(c->ssds);
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

/* A profile of one tilt and SSD (NAN: any). */
static bool matches_key(const sl_model_profile *p, double e, const char *app, const char *ins,
                        double tilt, double ssd)
{
    return matches(p, e, app, ins) && (isnan(tilt) || fabs(p->tilt_deg - tilt) < 1e-6) &&
           (isnan(ssd) || fabs(p->ssd_cm - ssd) < 1e-6);
}

/* Insert x into the increasing list v of *n distinct values (room assumed). */
static void add_distinct(double *v, size_t *n, double x)
{
    size_t i = 0;
    while (i < *n && v[i] < x - 1e-6)
        i++;
    if (i < *n && fabs(v[i] - x) < 1e-6)
        return;
    memmove(v + i + 1, v + i, (*n - i) * sizeof *v);
    v[i] = x;
    (*n)++;
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
        /* one entry for each energy and applicator, whatever outputs (one
         * for each SSD) the machine lists for it */
        for (size_t j = 0; j < i && has; j++)
            has = !(fabs(m->machine.outputs[j].energy_mev - o->energy_mev) < 0.01 &&
                    strcmp(m->machine.outputs[j].applicator, o->applicator) == 0);
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

/* The level a profile keeps beyond its farthest measured point: the larger
 * of its fit there (fit_hi) and the mean of its last three measured doses. */
static double measured_floor(const sl_model_profile *p, double fit_hi)
{
    size_t k = p->n < 3 ? p->n : 3;
    double sum = 0;
    for (size_t i = p->n - k; i < p->n; i++)
        sum += p->dose_percent[i];
    return fmax(sum / (double)k, fit_hi);
}

/* How fast the dose may rise toward the edge nearer than a profile's first
 * measured distance, relative per cm: the log slope of its first three
 * measured doses continued, and never less than the rate beyond the
 * farthest (SL_EXTRAPOLATION_PER_CM). A profile measured from the edge
 * never needs it. */
static double near_rise(const sl_model_profile *p)
{
    size_t k = p->n < 3 ? p->n - 1 : 2;
    double slope = 0;
    if (k > 0 && p->dose_percent[k] > 0 && p->distance_cm[k] > p->distance_cm[0])
        slope = log(p->dose_percent[0] / p->dose_percent[k]) /
                (p->distance_cm[k] - p->distance_cm[0]);
    return fmax(slope, SL_EXTRAPOLATION_PER_CM);
}

/* The curves of exactly this energy, applicator, insert, tilt and SSD (n of
 * them). */
static sl_status build_flat(const sl_model *m, double e, const char *app, const char *ins,
                            double tilt, double ssd, size_t n, sl_curve_set **out,
                            sl_error *err)
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
        if (matches_key(&m->profiles[i], e, app, ins, tilt, ssd))
            sel[k++] = &m->profiles[i];
    }
    qsort(sel, n, sizeof *sel, cmp_prof_depth);
    c->nominal_ssd_cm = m->machine.nominal_ssd_cm;
    c->tilts = malloc(sizeof *c->tilts);
    c->ssds = malloc(sizeof *c->ssds);
    if (c->tilts && c->ssds) {
        c->ntilts = c->nssds = 1;
        c->tilts[0] = tilt;
        c->ssds[0] = ssd;
    }
    c->groups = calloc(n, sizeof *c->groups);
    c->depths = calloc(n, sizeof *c->depths);
    sl_status st = c->groups && c->depths && c->tilts && c->ssds ? SL_OK : SL_ENOMEM;
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
            c->ndepths = c->ngroups;
        }
        curve *cv = &g->curves[g->ncurves++];
        cv->prof = sel[i];
        cv->angle_deg = direction_angle(sel[i]->direction);
        c->range_lo = fmin(c->range_lo, sel[i]->fit.range_lo_cm);
        c->range_hi = fmax(c->range_hi, sel[i]->fit.range_hi_cm);
        size_t np = sel[i]->n;
        sl_profile_fit_sym(&sel[i]->fit, cv->sym);
        cv->fit_lo = sl_profile_fit_eval(&sel[i]->fit, sel[i]->distance_cm[0], &cv->u_lo);
        cv->fit_hi = sl_profile_fit_eval(&sel[i]->fit, sel[i]->distance_cm[np - 1], &cv->u_hi);
        cv->floor = measured_floor(sel[i], cv->fit_hi);
        cv->near_floor = fmax(sel[i]->dose_percent[0], cv->fit_lo);
        cv->near_rise = near_rise(sel[i]);
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

/* Each SSD's row of layers, by increasing tilt (layers of equal tilt keep
 * their order). */
static sl_status build_rows(sl_curve_set *c)
{
    c->rows = calloc(c->nssds, sizeof *c->rows);
    if (!c->rows)
        return SL_ENOMEM;
    for (size_t r = 0; r < c->nssds; r++) {
        ssd_row *row = &c->rows[r];
        row->tilts = malloc(c->nlayers * sizeof *row->tilts);
        row->sets = malloc(c->nlayers * sizeof *row->sets);
        if (!row->tilts || !row->sets)
            return SL_ENOMEM;
        for (size_t k = 0; k < c->nlayers; k++) {
            if (fabs(c->layers[k].ssd_cm - c->ssds[r]) > 1e-6)
                continue;
            size_t i = row->n;
            while (i > 0 && row->tilts[i - 1] > c->layers[k].tilt_deg) {
                row->tilts[i] = row->tilts[i - 1];
                row->sets[i] = row->sets[i - 1];
                i--;
            }
            row->tilts[i] = c->layers[k].tilt_deg;
            row->sets[i] = c->layers[k].set;
            row->n++;
        }
    }
    return SL_OK;
}

static size_t count_key(const sl_model *m, double e, const char *app, const char *ins,
                        double tilt, double ssd)
{
    size_t n = 0;
    for (size_t i = 0; i < m->nprofiles; i++)
        n += matches_key(&m->profiles[i], e, app, ins, tilt, ssd);
    return n;
}

static size_t count_matches(const sl_model *m, double e, const char *app, const char *ins)
{
    return count_key(m, e, app, ins, NAN, NAN);
}

/* The curves of this energy, applicator and insert (n of them): one flat
 * set when they share one tilt and SSD, else one flat set a (tilt, SSD). */
static sl_status build_set(const sl_model *m, double e, const char *app, const char *ins,
                           size_t n, sl_curve_set **out, sl_error *err)
{
    double *tl = malloc(n * sizeof *tl), *sl = malloc(n * sizeof *sl);
    size_t nt = 0, ns = 0;
    layer *ly = calloc(n, sizeof *ly);
    size_t nl = 0;
    if (!tl || !sl || !ly) {
        free(tl);
        free(sl);
        free(ly);
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    }
    for (size_t i = 0; i < m->nprofiles; i++) {
        const sl_model_profile *p = &m->profiles[i];
        if (!matches(p, e, app, ins))
            continue;
        add_distinct(tl, &nt, p->tilt_deg);
        add_distinct(sl, &ns, p->ssd_cm);
        bool seen = false;
        for (size_t k = 0; k < nl && !seen; k++)
            seen = fabs(ly[k].tilt_deg - p->tilt_deg) < 1e-6 && fabs(ly[k].ssd_cm - p->ssd_cm) < 1e-6;
        if (!seen)
            ly[nl++] = (layer){p->tilt_deg, p->ssd_cm, NULL};
    }
    if (nl == 1) {
        sl_status st = build_flat(m, e, app, ins, ly[0].tilt_deg, ly[0].ssd_cm, n, out, err);
        free(tl);
        free(sl);
        free(ly);
        return st;
    }
    sl_curve_set *c = calloc(1, sizeof *c);
    if (!c) {
        free(tl);
        free(sl);
        free(ly);
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    }
    c->nominal_ssd_cm = m->machine.nominal_ssd_cm;
    c->transfer = &m->machine.transfer;
    c->tilts = tl;
    c->ntilts = nt;
    c->ssds = sl;
    c->nssds = ns;
    c->layers = ly;
    c->nlayers = nl;
    c->range_lo = INFINITY;
    c->range_hi = -INFINITY;
    sl_status st = SL_OK;
    size_t ref = 0; /* the layer nearest normal incidence at the nominal SSD: its depths */
    for (size_t k = 0; k < nl && st == SL_OK; k++) {
        size_t nk = count_key(m, e, app, ins, ly[k].tilt_deg, ly[k].ssd_cm);
        st = build_flat(m, e, app, ins, ly[k].tilt_deg, ly[k].ssd_cm, nk, &ly[k].set, err);
        if (st != SL_OK)
            break;
        c->range_lo = fmin(c->range_lo, ly[k].set->range_lo);
        c->range_hi = fmax(c->range_hi, ly[k].set->range_hi);
        double dk = fabs(ly[k].ssd_cm - c->nominal_ssd_cm) * 10 + fabs(ly[k].tilt_deg);
        double dr = fabs(ly[ref].ssd_cm - c->nominal_ssd_cm) * 10 + fabs(ly[ref].tilt_deg);
        if (dk < dr)
            ref = k;
    }
    if (st != SL_OK) {
        sl_curve_set_free(c);
        return st;
    }
    c->depths = malloc(ly[ref].set->ngroups * sizeof *c->depths);
    if (!c->depths || build_rows(c) != SL_OK) {
        sl_curve_set_free(c);
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    }
    memcpy(c->depths, ly[ref].set->depths, ly[ref].set->ngroups * sizeof *c->depths);
    c->ngroups = 0;
    c->ndepths = ly[ref].set->ngroups;
    *out = c;
    return SL_OK;
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

static sl_status select_set(const sl_model *m, double e, const char *app, const char *insert,
                            sl_curve_set **out, unsigned *flags, sl_error *err);

sl_status sl_model_select(const sl_model *m, double e, const char *app, const char *insert,
                          sl_curve_set **out, unsigned *flags, sl_error *err)
{
    sl_status st = select_set(m, e, app, insert, out, flags, err);
    if (st == SL_OK)
        (*out)->scale = sl_model_find_scale(m, e, app);
    return st;
}

static sl_status select_set(const sl_model *m, double e, const char *app, const char *insert,
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
    return c->ndepths;
}

size_t sl_curves_tilts(const sl_curve_set *c, const double **tilts)
{
    *tilts = c->tilts;
    return c->ntilts;
}

size_t sl_curves_ssds(const sl_curve_set *c, const double **ssds)
{
    *ssds = c->ssds;
    return c->nssds;
}

void sl_curves_range(const sl_curve_set *c, double *lo, double *hi)
{
    *lo = c->range_lo;
    *hi = c->range_hi;
}

/* How to evaluate: the fitted form or the measured points. */
typedef struct eval_how {
    sl_eval_mode mode;
} eval_how;

/* The dose alone of the lean path (below): percent and the electrons' share. */
typedef struct dose_part {
    double v;      /* percent */
    double e_frac; /* the electrons' share */
} dose_part;

typedef struct point_value {
    double v, u_fit, u_meas, u_extrap, e_frac;
    bool extrapolated, poor;
} point_value;

/* A profile's value at d from its measured points (SL_EVAL_POINTS): the
 * log-linear interpolation between them, and beyond them the fitted form
 * (fit, its value at d) scaled to meet the end point. */
static double points_value(const curve *cv, double d, double fit)
{
    const sl_model_profile *p = cv->prof;
    double lo = p->distance_cm[0], hi = p->distance_cm[p->n - 1];
    if (d >= lo && d <= hi)
        return exp(gsl_interp_eval(cv->interp, p->distance_cm, cv->logdose, d, NULL));
    double at_end = d > hi ? cv->fit_hi : cv->fit_lo;
    double meas_end = p->dose_percent[d > hi ? p->n - 1 : 0];
    return fit * meas_end / at_end;
}

/* The least a profile reads `inside` cm nearer the edge than its first
 * measured distance: the level held there, rising on at the measured rise
 * (log-linear, near_rise per cm), as the dose rises toward the edge. */
static double near_level(const curve *cv, double inside)
{
    return cv->near_floor * exp(cv->near_rise * inside);
}

/* One profile at one distance. */
static point_value curve_value(const curve *cv, double d, eval_how how)
{
    const sl_model_profile *p = cv->prof;
    point_value r = {0};
    double ufit = 0, el, ph;
    double fit = sl_profile_fit_eval_sym(&p->fit, cv->sym, d, &ufit, &el, &ph);
    r.e_frac = el + ph > 0 ? el / (el + ph) : 0;
    double lo = p->distance_cm[0], hi = p->distance_cm[p->n - 1];
    r.extrapolated = d > hi + 1e-9 || d < lo - 1e-9;
    if (how.mode == SL_EVAL_POINTS) {
        r.v = points_value(cv, d, fit);
        r.u_fit = ufit * (fit > 0 ? r.v / fit : 1);
    } else {
        r.v = fit;
        r.u_fit = ufit;
    }
    if (d > hi) {
        /* far out, head leakage flattens the curve: an exponential tail
         * would under-read, so the measured floor holds (all photons) */
        double floor = cv->floor;
        if (!(r.v >= floor)) {
            /* the fit's relative uncertainty where it was last measured */
            r.u_fit = cv->fit_hi > 0 ? cv->u_hi / cv->fit_hi * floor : 0;
            r.e_frac = r.v > 0 ? r.e_frac * r.v / floor : 0;
            r.v = floor;
        }
        r.u_extrap = SL_EXTRAPOLATION_PER_CM * (d - hi) * r.v;
    } else if (d < lo) {
        /* nearer the edge than measured: a peaked fit may fall again there
         * while the dose rises toward the edge, so the measured rise goes
         * on from the nearest measured level, and the distance from it is
         * an extrapolation */
        double floor = near_level(cv, lo - d);
        if (!(r.v >= floor)) {
            r.u_fit = cv->fit_lo > 0 ? cv->u_lo / cv->fit_lo * floor : 0;
            r.e_frac = r.v > 0 ? r.e_frac * r.v / floor : 0;
            r.v = floor;
        }
        r.u_extrap = cv->near_rise * (lo - d) * r.v;
    }
    r.poor = p->fit.poor;
    double rel = p->rel_uncertainty * r.v;
    r.u_meas = sqrt(rel * rel + p->floor_percent * p->floor_percent);
    if (p->fit.poor) {
        double wide = p->fit.max_residual_relative * r.v;
        r.u_fit = sqrt(r.u_fit * r.u_fit + wide * wide);
    }
    return r;
}

/* The log-linear blend of two doses with weight w on b (0 < w < 1):
 * a^(1 - w) b^w, written with one logarithm instead of two (the blends'
 * logarithms were a twentieth of a scan's instructions). */
static double log_blend(double a, double b, double w)
{
    return a * exp(w * log(b / a));
}

/* The share of the electrons a what-if shield lets through (1 when none or
 * out of range). */
static double transmission_used(double electron_t)
{
    return electron_t >= 0 && electron_t <= 1 ? electron_t : 1;
}

/* The SSD a query is evaluated at: its own, or the nominal one. */
static double ssd_used(const sl_curve_set *c, double ssd_q)
{
    return isfinite(ssd_q) && ssd_q > 0 ? ssd_q : c->nominal_ssd_cm;
}

/* Log-linear blend of two values with weight w on b; uncertainties blend
 * relatively, like the values. */
static point_value blend(point_value a, point_value b, double w)
{
    if (w <= 0)
        return a;
    if (w >= 1)
        return b;
    point_value r = {0};
    r.v = log_blend(a.v, b.v, w);
    r.u_fit = ((1 - w) * a.u_fit / a.v + w * b.u_fit / b.v) * r.v;
    r.u_meas = ((1 - w) * a.u_meas / a.v + w * b.u_meas / b.v) * r.v;
    r.u_extrap = ((1 - w) * a.u_extrap / a.v + w * b.u_extrap / b.v) * r.v;
    r.e_frac = (1 - w) * a.e_frac + w * b.e_frac;
    r.extrapolated = a.extrapolated || b.extrapolated;
    r.poor = a.poor || b.poor;
    return r;
}

/* Where x falls in the increasing list v of n values: the two neighbours
 * and the weight on the second, or the nearest one (i0 == i1) with *beyond
 * the distance from it. */
static void bracket(const double *v, size_t n, double x, size_t *i0, size_t *i1, double *w,
                    double *beyond)
{
    *w = 0;
    *beyond = 0;
    if (x <= v[0]) {
        *i0 = *i1 = 0;
        *beyond = v[0] - x;
    } else if (x >= v[n - 1]) {
        *i0 = *i1 = n - 1;
        *beyond = x - v[n - 1];
    } else {
        size_t k = 1;
        while (k < n && v[k] < x)
            k++;
        *i0 = k - 1;
        *i1 = k;
        *w = (x - v[k - 1]) / (v[k] - v[k - 1]);
    }
}

/* Where a direction falls among a group's curves (sorted by angle): the
 * two around it and the weight on the second, or one (k0 == k1) at or
 * beyond the first and beyond the last. */
static void direction_bracket(const depth_group *g, double angle, size_t *k0, size_t *k1,
                              double *w)
{
    size_t k = 0;
    while (k < g->ncurves && g->curves[k].angle_deg < angle)
        k++;
    *w = 0;
    if (k == 0 || k == g->ncurves) {
        *k0 = *k1 = k ? k - 1 : 0;
        return;
    }
    *k0 = k - 1;
    *k1 = k;
    double a0 = g->curves[k - 1].angle_deg, a1 = g->curves[k].angle_deg;
    *w = (angle - a0) / (a1 - a0);
}

/* The curves measured at one depth, at a direction: interpolated between the
 * two measured directions around it (the nearest beyond the measured ones),
 * or the highest when the direction is unknown. *between receives the
 * interpolation spread w (1 - w) |b - a|. */
static point_value group_value(const depth_group *g, double d, double angle, eval_how how,
                               double *between)
{
    *between = 0;
    if (g->ncurves == 1)
        return curve_value(&g->curves[0], d, how);
    if (isnan(angle)) {
        point_value best = curve_value(&g->curves[0], d, how);
        for (size_t k = 1; k < g->ncurves; k++) {
            point_value r = curve_value(&g->curves[k], d, how);
            if (r.v > best.v)
                best = r;
        }
        return best;
    }
    size_t k0, k1;
    double w;
    direction_bracket(g, angle, &k0, &k1, &w);
    if (k0 == k1)
        return curve_value(&g->curves[k0], d, how);
    point_value a = curve_value(&g->curves[k0], d, how), b = curve_value(&g->curves[k1], d, how);
    point_value r = blend(a, b, w);
    /* a profile whose measured range ends before d counts only when it has weight */
    r.extrapolated = (w < 1 && a.extrapolated) || (w > 0 && b.extrapolated);
    *between = w * (1 - w) * fabs(b.v - a.v);
    return r;
}

/* Where an evaluation starts. Assigning it clears a value with a few vector
 * moves; memset of this size compiled to a `rep stos`, whose start-up cost,
 * several times at every sample, showed in the estimate's profile. */
static const sl_model_value zero_value;

static void set_nan(sl_model_value *out)
{
    out->percent = out->u_percent = out->u_fit = out->u_meas = out->u_interp = NAN;
    out->u_extrap = out->u_standin = out->u_transfer = out->u_uncommissioned = NAN;
    out->scale = 1;
    out->tilt_used_deg = out->ssd_used_cm = NAN;
    out->electron_percent = out->photon_percent = NAN;
}

static void group_dose(const depth_group *g, const double *d, size_t n, double angle,
                       sl_eval_mode mode, bool linked, dose_part *out);

/* One flat curve set (no members, one tilt and SSD) at one distance. */
static void eval_flat(const sl_curve_set *c, double depth, double d, double angle,
                      eval_how how, double electron_t, sl_model_value *out)
{
    size_t g0, g1;
    double w, beyond;
    bracket(c->depths, c->ngroups, depth, &g0, &g1, &w, &beyond);
    out->depth_used_cm = g0 == g1 ? c->depths[g0] : depth;
    if (beyond > 1e-9)
        out->flags |= SL_MF_DEPTH_OUTSIDE;
    double s0, s1 = 0;
    point_value a = group_value(&c->groups[g0], d, angle, how, &s0);
    point_value b = g1 == g0 ? a : group_value(&c->groups[g1], d, angle, how, &s1);
    if (g1 == g0)
        s1 = s0;
    point_value r = blend(a, b, w);
    if (r.extrapolated)
        out->flags |= SL_MF_EXTRAPOLATED;
    if (r.poor)
        out->flags |= SL_MF_POOR_FIT;
    /* a what-if shield takes off part of the electron share only */
    double t = transmission_used(electron_t);
    double scale = r.e_frac * t + (1 - r.e_frac);
    out->percent = r.v * scale;
    out->electron_percent = r.v * r.e_frac * t;
    out->photon_percent = r.v * (1 - r.e_frac);
    double rs = (1 - w) * s0 / a.v + w * s1 / b.v;
    double between = w * (1 - w) * fabs(b.v - a.v);
    out->u_fit = r.u_fit / r.v * out->percent;
    out->u_meas = r.u_meas / r.v * out->percent;
    out->u_extrap = r.u_extrap / r.v * out->percent;
    out->u_interp = sqrt(between * between + (rs * r.v) * (rs * r.v)) * scale;
    if (beyond > 1e-9) {
        /* beyond the commissioned depths: the nearest depth's value, and the
         * rise toward this side continued as an uncertainty (model.h) */
        bool shallower = depth < c->depths[0];
        double fixed = SL_DEPTH_OUTSIDE_PER_CM * beyond, rel = fixed;
        if (c->ngroups >= 2) {
            size_t g2 = shallower ? 1 : c->ngroups - 2;
            /* the neighbour's dose alone (the lean path's, bitwise the
             * same as the full evaluation's value) */
            dose_part n2;
            group_dose(&c->groups[g2], &d, 1, angle, how.mode, false, &n2);
            double slope = log(a.v / n2.v) / fabs(c->depths[g0] - c->depths[g2]);
            rel = slope > 0 ? slope * beyond : 0;
            /* toward the surface the scattered electrons' dose can rise
             * although the commissioned depths fall: never less there */
            if (shallower)
                rel = fmax(rel, fixed);
        }
        if (rel > 0)
            out->u_extrap = hypot(out->u_extrap, rel * out->percent);
    }
}

/* Log-linear blend of two evaluations with weight w on b, as between
 * depths: components blend relatively, and the
 * interpolation spread w (1 - w) |b - a| joins the interpolation component. */
static void blend_values(const sl_model_value *a, const sl_model_value *b, double w,
                         sl_model_value *out)
{
    unsigned flags = a->flags | b->flags;
    if (w <= 0 || w >= 1 || !(a->percent > 0) || !(b->percent > 0)) {
        *out = w >= 1 ? *b : *a;
        out->flags = (w <= 0 ? a->flags : w >= 1 ? b->flags : flags);
        return;
    }
    sl_model_value r = *a;
    r.percent = log_blend(a->percent, b->percent, w);
    r.depth_used_cm = (1 - w) * a->depth_used_cm + w * b->depth_used_cm;
    r.tilt_used_deg = (1 - w) * a->tilt_used_deg + w * b->tilt_used_deg;
    r.ssd_used_cm = (1 - w) * a->ssd_used_cm + w * b->ssd_used_cm;
    r.flags = flags;
#define REL(f) (((1 - w) * a->f / a->percent + w * b->f / b->percent) * r.percent)
    r.u_fit = REL(u_fit);
    r.u_meas = REL(u_meas);
    r.u_extrap = REL(u_extrap);
    r.u_uncommissioned = REL(u_uncommissioned);
    r.electron_percent = REL(electron_percent);
    r.photon_percent = REL(photon_percent);
    double ui = REL(u_interp);
#undef REL
    double between = w * (1 - w) * fabs(b->percent - a->percent);
    r.u_interp = sqrt(ui * ui + between * between);
    *out = r;
}

/* The layers of one SSD (c->ssds[r]) at a tilt: interpolated between the
 * commissioned tilts around it, the nearest beyond them (flagged beyond the
 * tolerance, with its uncertainty component), the highest when the tilt is
 * unknown. */
static void eval_at_ssd(const sl_curve_set *c, size_t r, double depth, double d, double angle,
                        double tilt, eval_how how, double electron_t, sl_model_value *out)
{
    double ssd = c->ssds[r];
    const double *tl = c->rows[r].tilts;
    const sl_curve_set *const *sets = c->rows[r].sets;
    size_t n = c->rows[r].n;
    if (isnan(tilt)) {
        /* unknown tilt: the highest of the commissioned ones */
        for (size_t k = 0; k < n; k++) {
            sl_model_value v;
            v = zero_value;
            eval_flat(sets[k], depth, d, angle, how, electron_t, &v);
            v.tilt_used_deg = tl[k];
            v.ssd_used_cm = ssd;
            if (k == 0 || v.percent > out->percent) {
                unsigned f = k ? out->flags : 0;
                *out = v;
                out->flags |= f;
            } else {
                out->flags |= v.flags;
            }
        }
        return;
    }
    size_t i0, i1;
    double w, beyond;
    bracket(tl, n, tilt, &i0, &i1, &w, &beyond);
    sl_model_value a, b;
    a = zero_value;
    b = zero_value;
    eval_flat(sets[i0], depth, d, angle, how, electron_t, &a);
    a.tilt_used_deg = tl[i0];
    a.ssd_used_cm = ssd;
    if (i1 != i0) {
        eval_flat(sets[i1], depth, d, angle, how, electron_t, &b);
        b.tilt_used_deg = tl[i1];
        b.ssd_used_cm = ssd;
    } else {
        b = a;
    }
    blend_values(&a, &b, w, out);
    if (beyond > SL_TILT_TOLERANCE_DEG) {
        out->flags |= SL_MF_TILT_OUTSIDE;
        out->u_uncommissioned =
            hypot(out->u_uncommissioned, SL_UNCOMMISSIONED_PER_DEG * beyond * out->percent);
    }
}

/* One curve set (no members) at one distance, tilt and SSD. */
static void eval_set(const sl_curve_set *c, double depth, double d, double angle, double tilt,
                     double ssd_q, eval_how how, double electron_t, sl_model_value *out)
{
    double ssd = ssd_used(c, ssd_q);
    unsigned given = out->flags;
    size_t i0, i1;
    double w, beyond;
    bracket(c->ssds, c->nssds, ssd, &i0, &i1, &w, &beyond);
    if (c->nlayers == 0) {
        /* one tilt and SSD */
        eval_flat(c, depth, d, angle, how, electron_t, out);
        out->tilt_used_deg = c->tilts[0];
        out->ssd_used_cm = c->ssds[0];
        double tb = isnan(tilt) ? 0 : fabs(tilt - c->tilts[0]);
        if (tb > SL_TILT_TOLERANCE_DEG) {
            out->flags |= SL_MF_TILT_OUTSIDE;
            out->u_uncommissioned = SL_UNCOMMISSIONED_PER_DEG * tb * out->percent;
        }
    } else {
        sl_model_value a, b;
        a = zero_value;
        b = zero_value;
        eval_at_ssd(c, i0, depth, d, angle, tilt, how, electron_t, &a);
        if (i1 != i0)
            eval_at_ssd(c, i1, depth, d, angle, tilt, how, electron_t, &b);
        else
            b = a;
        blend_values(&a, &b, w, out);
        out->flags |= given;
    }
    if (beyond > SL_SSD_TOLERANCE_CM) {
        out->flags |= SL_MF_SSD_OUTSIDE;
        out->u_uncommissioned =
            hypot(out->u_uncommissioned, SL_UNCOMMISSIONED_PER_CM * beyond * out->percent);
    }
}

static void combine(const sl_curve_set *c, double d, sl_model_value *out)
{
    double rel = sl_transfer_relative(c->transfer, d);
    out->scale = 1;
    double unscaled = out->percent;
    if (c->scale && isfinite(out->percent)) {
        /* the in-vivo scale: every part of the value and its components
         * scale with the dose; the scale's own uncertainty joins the
         * transfer component (it is the same water-tank-to-patient question
         * answered by the clinic's readings) */
        double f = c->scale->factor;
        out->percent *= f;
        out->electron_percent *= f;
        out->photon_percent *= f;
        out->u_fit *= f;
        out->u_meas *= f;
        out->u_interp *= f;
        out->u_extrap *= f;
        out->u_standin *= f;
        out->u_uncommissioned *= f;
        out->scale = f;
        out->flags |= SL_MF_INVIVO_SCALED;
        rel = hypot(rel, sl_model_scale_rel_u(c->scale));
    }
    out->u_transfer = rel * out->percent;
    double other2 = out->u_fit * out->u_fit + out->u_meas * out->u_meas +
                    out->u_interp * out->u_interp + out->u_extrap * out->u_extrap +
                    out->u_standin * out->u_standin +
                    out->u_uncommissioned * out->u_uncommissioned;
    if (out->scale < 1) {
        /* a scale below 1 lowers the estimate only: the transfer component
         * widens until the upper bound (k = 2) is at least the unscaled
         * estimate, so that readings never lower what a screening passes */
        double need = 0.5 * (unscaled - out->percent);
        if (need * need > other2 + out->u_transfer * out->u_transfer)
            out->u_transfer = sqrt(need * need - other2);
    }
    out->u_percent = sqrt(other2 + out->u_transfer * out->u_transfer);
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
    v->u_uncommissioned *= k;
}

void sl_curves_eval_query(const sl_curve_set *c, const sl_eval_query *q, sl_model_value *out)
{
    eval_how how = {q->mode};
    *out = zero_value;
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
    eval_set(c, depth, d, q->angle_deg, q->tilt_deg, q->ssd_cm, how, q->electron_t, out);
    if (c->standin) {
        /* the largest candidate; the flags of every candidate are kept */
        double lo = out->percent;
        sl_model_value cand;
        if (isfinite(q->app_distance_cm) && q->app_distance_cm >= 0) {
            cand = zero_value;
            eval_set(c, depth, q->app_distance_cm, q->angle_deg, q->tilt_deg, q->ssd_cm, how,
                     q->electron_t, &cand);
            cand.flags |= out->flags;
            out->flags = cand.flags;
            lo = fmin(lo, cand.percent);
            if (cand.percent > out->percent)
                *out = cand;
        }
        for (size_t k = 0; k < c->nmembers; k++) {
            cand = zero_value;
            eval_set(c->members[k].set, depth, d, q->angle_deg, q->tilt_deg, q->ssd_cm, how,
                     q->electron_t, &cand);
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

/* ------------------------------------------------------ dose alone -- */

/* The dose alone, as the setup shift's neighbouring evaluations take it at
 * every sample: the same arithmetic as the full evaluation's percent, step
 * for step, without the uncertainty components, the flags and the copies of
 * whole values they need. The unit test dose_alone_equals_the_full_evaluation
 * holds the two paths bitwise equal. */

/* A profile's dose at d from its fit there (value, electron and photon
 * parts): the measured points in that mode, the floor beyond them. */
static dose_part curve_finish(const curve *cv, double d, sl_eval_mode mode, double fit,
                              double el, double ph)
{
    const sl_model_profile *p = cv->prof;
    dose_part r = {fit, el + ph > 0 ? el / (el + ph) : 0};
    double lo = p->distance_cm[0], hi = p->distance_cm[p->n - 1];
    if (mode == SL_EVAL_POINTS)
        r.v = points_value(cv, d, fit);
    if (d > hi && !(r.v >= cv->floor)) {
        r.e_frac = r.v > 0 ? r.e_frac * r.v / cv->floor : 0;
        r.v = cv->floor;
    } else if (d < lo) {
        double floor = near_level(cv, lo - d);
        if (!(r.v >= floor)) {
            r.e_frac = r.v > 0 ? r.e_frac * r.v / floor : 0;
            r.v = floor;
        }
    }
    return r;
}

static dose_part curve_dose(const curve *cv, double d, sl_eval_mode mode)
{
    double el, ph;
    double fit = sl_profile_fit_eval_parts(&cv->prof->fit, d, NULL, &el, &ph);
    return curve_finish(cv, d, mode, fit, el, ph);
}

/* One profile at the n distances of a lean evaluation. linked: d[1] is d[0]
 * less twice the setup shift the set was prepared for, so the second
 * distance's exponentials come from the first's (sl_profile_value_two),
 * and a third distance is the query's own, d[0] less the shift, whose
 * exponentials come from d[0]'s too (sl_profile_value_three): that took
 * a third of the exponentials of a stand-in's choice of candidate. */
static void curve_doses(const curve *cv, const double *d, size_t n, sl_eval_mode mode,
                        bool linked, dose_part *out)
{
    size_t i = 0;
    if (linked && n == 3) {
        const sl_profile_fit *f = &cv->prof->fit;
        double v[3], el[3], ph[3];
        sl_profile_value_three(f->form, f->theta, d, cv->shift_k, cv->shift_kh, cv->shift_gk, v,
                               el, ph);
        for (; i < 3; i++)
            out[i] = curve_finish(cv, d[i], mode, v[i], el[i], ph[i]);
        return;
    }
    if (linked) {
        const sl_profile_fit *f = &cv->prof->fit;
        double v[2], el[2], ph[2];
        sl_profile_value_two(f->form, f->theta, d, cv->shift_k, v, el, ph);
        for (; i < 2; i++)
            out[i] = curve_finish(cv, d[i], mode, v[i], el[i], ph[i]);
    }
    for (; i < n; i++)
        out[i] = curve_dose(cv, d[i], mode);
}

static dose_part blend_dose(dose_part a, dose_part b, double w)
{
    if (w <= 0)
        return a;
    if (w >= 1)
        return b;
    dose_part r;
    r.v = log_blend(a.v, b.v, w);
    r.e_frac = (1 - w) * a.e_frac + w * b.e_frac;
    return r;
}

/* The lean path evaluates one query at up to LEAN_MAX distances at once:
 * where a query falls among the depths, directions, tilts and SSDs does
 * not depend on its distance, so the setup shift's two neighbours, and for
 * a stand-in the query's own distance (to choose its candidate), share one
 * walk down the curve set. Each distance's arithmetic is the single
 * evaluation's, step for step, but for the exponentials that a linked pair
 * shares (curve_doses). */
#define LEAN_MAX 3

static void group_dose(const depth_group *g, const double *d, size_t n, double angle,
                       sl_eval_mode mode, bool linked, dose_part *out)
{
    if (g->ncurves == 1) {
        curve_doses(&g->curves[0], d, n, mode, linked, out);
        return;
    }
    if (isnan(angle)) {
        curve_doses(&g->curves[0], d, n, mode, linked, out);
        for (size_t k = 1; k < g->ncurves; k++) {
            dose_part r[LEAN_MAX];
            curve_doses(&g->curves[k], d, n, mode, linked, r);
            for (size_t i = 0; i < n; i++)
                if (r[i].v > out[i].v)
                    out[i] = r[i];
        }
        return;
    }
    size_t k0, k1;
    double w;
    direction_bracket(g, angle, &k0, &k1, &w);
    if (k0 == k1) {
        curve_doses(&g->curves[k0], d, n, mode, linked, out);
        return;
    }
    dose_part a[LEAN_MAX], b[LEAN_MAX];
    curve_doses(&g->curves[k0], d, n, mode, linked, a);
    curve_doses(&g->curves[k1], d, n, mode, linked, b);
    for (size_t i = 0; i < n; i++)
        out[i] = blend_dose(a[i], b[i], w);
}

static void flat_dose(const sl_curve_set *c, double depth, const double *d, size_t n,
                      double angle, sl_eval_mode mode, double electron_t, bool linked,
                      double *out)
{
    size_t g0, g1;
    double w, beyond;
    bracket(c->depths, c->ngroups, depth, &g0, &g1, &w, &beyond);
    dose_part a[LEAN_MAX], b[LEAN_MAX];
    group_dose(&c->groups[g0], d, n, angle, mode, linked, a);
    if (g1 != g0)
        group_dose(&c->groups[g1], d, n, angle, mode, linked, b);
    double t = transmission_used(electron_t);
    for (size_t i = 0; i < n; i++) {
        dose_part r = blend_dose(a[i], g1 == g0 ? a[i] : b[i], w);
        out[i] = r.v * (r.e_frac * t + (1 - r.e_frac));
    }
}

/* blend_values' percent */
static double blend_percent(double a, double b, double w)
{
    if (w <= 0 || w >= 1 || !(a > 0) || !(b > 0))
        return w >= 1 ? b : a;
    return log_blend(a, b, w);
}

static void ssd_dose(const sl_curve_set *c, size_t r, double depth, const double *d, size_t n,
                     const sl_eval_query *q, bool linked, double *out)
{
    const double *tl = c->rows[r].tilts;
    const sl_curve_set *const *sets = c->rows[r].sets;
    size_t nt = c->rows[r].n;
    double a[LEAN_MAX], b[LEAN_MAX];
    if (isnan(q->tilt_deg)) {
        for (size_t i = 0; i < n; i++)
            out[i] = 0;
        for (size_t k = 0; k < nt; k++) {
            flat_dose(sets[k], depth, d, n, q->angle_deg, q->mode, q->electron_t, linked, a);
            for (size_t i = 0; i < n; i++)
                if (k == 0 || a[i] > out[i])
                    out[i] = a[i];
        }
        return;
    }
    size_t i0, i1;
    double w, beyond;
    bracket(tl, nt, q->tilt_deg, &i0, &i1, &w, &beyond);
    flat_dose(sets[i0], depth, d, n, q->angle_deg, q->mode, q->electron_t, linked, a);
    if (i1 != i0)
        flat_dose(sets[i1], depth, d, n, q->angle_deg, q->mode, q->electron_t, linked, b);
    for (size_t i = 0; i < n; i++)
        out[i] = blend_percent(a[i], i1 != i0 ? b[i] : a[i], w);
}

static void set_dose(const sl_curve_set *c, double depth, const double *d, size_t n,
                     const sl_eval_query *q, bool linked, double *out)
{
    if (c->nlayers == 0) {
        flat_dose(c, depth, d, n, q->angle_deg, q->mode, q->electron_t, linked, out);
        return;
    }
    double ssd = ssd_used(c, q->ssd_cm);
    size_t i0, i1;
    double w, beyond;
    bracket(c->ssds, c->nssds, ssd, &i0, &i1, &w, &beyond);
    double a[LEAN_MAX], b[LEAN_MAX];
    ssd_dose(c, i0, depth, d, n, q, linked, a);
    if (i1 != i0)
        ssd_dose(c, i1, depth, d, n, q, linked, b);
    for (size_t i = 0; i < n; i++)
        out[i] = blend_percent(a[i], i1 != i0 ? b[i] : a[i], w);
}

/* Which of a stand-in's candidates gives the dose at one distance, as the
 * full evaluation chooses it: STANDIN_AT_EDGE the open curves from the
 * cutout's edge, STANDIN_AT_APPLICATOR from the applicator's, a member's
 * index above those; and the lowest candidate's dose. */
enum { STANDIN_AT_EDGE = 0, STANDIN_AT_APPLICATOR = 1, STANDIN_MEMBER = 2 };

typedef struct standin_pick {
    size_t i;      /* the distance picked for (of the n) */
    size_t winner;
    double lo;
} standin_pick;

/* The percent at n (1 to LEAN_MAX) distances of one query: distance i is
 * d[i] from the field edge and app[i] from the applicator. linked and
 * app_linked: the first two field-edge or applicator distances are twice
 * the prepared shift apart (curve_doses). pk, when given, receives a
 * stand-in's choice at its distance pk->i (before any in-vivo scale). */
static void eval_percent(const sl_curve_set *c, const sl_eval_query *q, const double *d,
                         const double *app, size_t n, bool linked, bool app_linked,
                         standin_pick *pk, double *out)
{
    double depth = q->depth_cm;
    double dd[LEAN_MAX], v[LEAN_MAX], cand[LEAN_MAX];
    bool ok[LEAN_MAX], any = false;
    for (size_t i = 0; i < n; i++) {
        ok[i] = !isnan(depth) && !isnan(d[i]) && d[i] >= 0;
        any = any || ok[i];
        dd[i] = ok[i] ? d[i] : 0; /* a stand-in; its value is not used */
        out[i] = NAN;
    }
    if (!any)
        return;
    set_dose(c, depth, dd, n, q, linked, v);
    if (c->standin) {
        size_t pi = pk ? pk->i : 0;
        if (pk) {
            pk->winner = STANDIN_AT_EDGE;
            pk->lo = v[pi];
        }
        bool app_ok[LEAN_MAX], app_any = false;
        double ad[LEAN_MAX];
        for (size_t i = 0; i < n; i++) {
            app_ok[i] = ok[i] && isfinite(app[i]) && app[i] >= 0;
            app_any = app_any || app_ok[i];
            ad[i] = app_ok[i] ? app[i] : 0;
        }
        if (app_any) {
            set_dose(c, depth, ad, n, q, app_linked && app_ok[0] && app_ok[1], cand);
            for (size_t i = 0; i < n; i++) {
                if (!app_ok[i])
                    continue;
                if (pk && i == pi) {
                    pk->lo = fmin(pk->lo, cand[i]);
                    if (cand[i] > v[i])
                        pk->winner = STANDIN_AT_APPLICATOR;
                }
                if (cand[i] > v[i])
                    v[i] = cand[i];
            }
        }
        for (size_t k = 0; k < c->nmembers; k++) {
            set_dose(c->members[k].set, depth, dd, n, q, linked, cand);
            for (size_t i = 0; i < n; i++) {
                double m = cand[i] * c->members[k].scale;
                if (pk && i == pi) {
                    pk->lo = fmin(pk->lo, m);
                    if (m > v[i])
                        pk->winner = STANDIN_MEMBER + k;
                }
                if (m > v[i])
                    v[i] = m;
            }
        }
    }
    for (size_t i = 0; i < n; i++) {
        if (!ok[i])
            continue;
        out[i] = c->scale && isfinite(v[i]) ? v[i] * c->scale->factor : v[i];
    }
}

double sl_curves_eval_percent(const sl_curve_set *c, const sl_eval_query *q)
{
    double out;
    eval_percent(c, q, &q->distance_cm, &q->app_distance_cm, 1, false, false, NULL, &out);
    return out;
}

bool sl_curves_use_direction(const sl_curve_set *c)
{
    for (size_t g = 0; g < c->ngroups; g++)
        if (c->groups[g].ncurves > 1)
            return true;
    for (size_t l = 0; l < c->nlayers; l++)
        if (sl_curves_use_direction(c->layers[l].set))
            return true;
    for (size_t k = 0; k < c->nmembers; k++)
        if (sl_curves_use_direction(c->members[k].set))
            return true;
    return false;
}

void sl_curves_prepare_shift(sl_curve_set *c, double shift_cm)
{
    if (!(shift_cm > 0 && isfinite(shift_cm)))
        return;
    bool finite = true;
    for (size_t g = 0; g < c->ngroups; g++)
        for (size_t k = 0; k < c->groups[g].ncurves; k++) {
            curve *cv = &c->groups[g].curves[k];
            sl_profile_shift_factors(cv->prof->fit.form, cv->prof->fit.theta, shift_cm,
                                     cv->shift_k, cv->shift_kh, &cv->shift_gk);
            finite = finite && isfinite(cv->shift_k[0]) && isfinite(cv->shift_k[1]) &&
                     isfinite(cv->shift_kh[0]) && isfinite(cv->shift_kh[1]);
        }
    for (size_t l = 0; l < c->nlayers; l++) {
        sl_curves_prepare_shift(c->layers[l].set, shift_cm);
        finite = finite && c->layers[l].set->shift_cm == shift_cm;
    }
    for (size_t k = 0; k < c->nmembers; k++) {
        sl_curves_prepare_shift(c->members[k].set, shift_cm);
        finite = finite && c->members[k].set->shift_cm == shift_cm;
    }
    /* a decay length so short that the factor overflows: no shortcut, the
     * two distances are evaluated one by one */
    c->shift_cm = finite ? shift_cm : 0;
}

void sl_curves_eval_percent_shift(const sl_curve_set *c, const sl_eval_query *q,
                                  double shift_cm, double out[2])
{
    const double d[2] = {q->distance_cm + shift_cm, fmax(q->distance_cm - shift_cm, 0)};
    const double app[2] = {q->app_distance_cm + shift_cm, q->app_distance_cm - shift_cm};
    /* only an unclamped pair is twice the shift apart */
    bool prepared = shift_cm > 0 && c->shift_cm == shift_cm;
    eval_percent(c, q, d, app, 2, prepared && q->distance_cm - shift_cm >= 0,
                 prepared && app[1] >= 0, NULL, out);
}

/* ------------------------------------------------ flags alone -- */

/* The flags the full evaluation of a set raises at one distance, without
 * its values: the marks of a stand-in's candidates that do not give the
 * dose, which the full evaluation keeps. Each function follows the one
 * named in its comment, rule for rule; where that one picks the highest
 * value (an unknown direction), the lean path's values, bitwise the same,
 * decide. */
typedef struct curve_marks {
    bool extrapolated, poor;
} curve_marks;

/* blend's and blend_values' rule for the marks of a weighted pair */
static curve_marks blend_marks(curve_marks a, curve_marks b, double w)
{
    if (w <= 0)
        return a;
    if (w >= 1)
        return b;
    return (curve_marks){a.extrapolated || b.extrapolated, a.poor || b.poor};
}

static unsigned blend_flags(unsigned a, unsigned b, double w)
{
    return w <= 0 ? a : w >= 1 ? b : a | b;
}

/* curve_value */
static curve_marks curve_marks_at(const curve *cv, double d)
{
    const sl_model_profile *p = cv->prof;
    double lo = p->distance_cm[0], hi = p->distance_cm[p->n - 1];
    return (curve_marks){d > hi + 1e-9 || d < lo - 1e-9, p->fit.poor};
}

/* group_value */
static curve_marks group_marks(const depth_group *g, double d, double angle, sl_eval_mode mode)
{
    if (g->ncurves == 1)
        return curve_marks_at(&g->curves[0], d);
    if (isnan(angle)) {
        size_t best = 0;
        double bv = curve_dose(&g->curves[0], d, mode).v;
        for (size_t k = 1; k < g->ncurves; k++) {
            double v = curve_dose(&g->curves[k], d, mode).v;
            if (v > bv) {
                bv = v;
                best = k;
            }
        }
        return curve_marks_at(&g->curves[best], d);
    }
    size_t k0, k1;
    double w;
    direction_bracket(g, angle, &k0, &k1, &w);
    if (k0 == k1)
        return curve_marks_at(&g->curves[k0], d);
    curve_marks a = curve_marks_at(&g->curves[k0], d), b = curve_marks_at(&g->curves[k1], d);
    curve_marks r = blend_marks(a, b, w);
    r.extrapolated = (w < 1 && a.extrapolated) || (w > 0 && b.extrapolated);
    return r;
}

/* eval_flat */
static unsigned flat_flags(const sl_curve_set *c, double depth, double d, double angle,
                           sl_eval_mode mode)
{
    size_t g0, g1;
    double w, beyond;
    bracket(c->depths, c->ngroups, depth, &g0, &g1, &w, &beyond);
    unsigned f = beyond > 1e-9 ? SL_MF_DEPTH_OUTSIDE : 0;
    curve_marks a = group_marks(&c->groups[g0], d, angle, mode);
    curve_marks b = g1 == g0 ? a : group_marks(&c->groups[g1], d, angle, mode);
    curve_marks r = blend_marks(a, b, w);
    if (r.extrapolated)
        f |= SL_MF_EXTRAPOLATED;
    if (r.poor)
        f |= SL_MF_POOR_FIT;
    return f;
}

/* eval_at_ssd */
static unsigned ssd_flags(const sl_curve_set *c, size_t r, double depth, double d,
                          const sl_eval_query *q)
{
    const double *tl = c->rows[r].tilts;
    const sl_curve_set *const *sets = c->rows[r].sets;
    size_t n = c->rows[r].n;
    unsigned f = 0;
    if (isnan(q->tilt_deg)) {
        for (size_t k = 0; k < n; k++)
            f |= flat_flags(sets[k], depth, d, q->angle_deg, q->mode);
        return f;
    }
    size_t i0, i1;
    double w, beyond;
    bracket(tl, n, q->tilt_deg, &i0, &i1, &w, &beyond);
    unsigned a = flat_flags(sets[i0], depth, d, q->angle_deg, q->mode);
    unsigned b = i1 != i0 ? flat_flags(sets[i1], depth, d, q->angle_deg, q->mode) : a;
    f = blend_flags(a, b, w);
    if (beyond > SL_TILT_TOLERANCE_DEG)
        f |= SL_MF_TILT_OUTSIDE;
    return f;
}

/* eval_set */
static unsigned set_flags(const sl_curve_set *c, double depth, double d, const sl_eval_query *q)
{
    double ssd = ssd_used(c, q->ssd_cm);
    size_t i0, i1;
    double w, beyond;
    bracket(c->ssds, c->nssds, ssd, &i0, &i1, &w, &beyond);
    unsigned f;
    if (c->nlayers == 0) {
        f = flat_flags(c, depth, d, q->angle_deg, q->mode);
        double tb = isnan(q->tilt_deg) ? 0 : fabs(q->tilt_deg - c->tilts[0]);
        if (tb > SL_TILT_TOLERANCE_DEG)
            f |= SL_MF_TILT_OUTSIDE;
    } else {
        unsigned a = ssd_flags(c, i0, depth, d, q);
        unsigned b = i1 != i0 ? ssd_flags(c, i1, depth, d, q) : a;
        f = blend_flags(a, b, w);
    }
    if (beyond > SL_SSD_TOLERANCE_CM)
        f |= SL_MF_SSD_OUTSIDE;
    return f;
}

void sl_curves_eval_query_shift(const sl_curve_set *c, const sl_eval_query *q, double shift_cm,
                                sl_model_value *out, double shifted[2])
{
    double depth = q->depth_cm, d = q->distance_cm, app = q->app_distance_cm;
    if (!c->standin || isnan(depth) || isnan(d) || !(d >= 0)) {
        sl_curves_eval_query(c, q, out);
        sl_curves_eval_percent_shift(c, q, shift_cm, shifted);
        return;
    }
    /* the pair of sl_curves_eval_percent_shift, and the query's own distance
     * to choose the candidate that gives the dose */
    const double d3[3] = {d + shift_cm, fmax(d - shift_cm, 0), d};
    const double app3[3] = {app + shift_cm, app - shift_cm, app};
    bool prepared = shift_cm > 0 && c->shift_cm == shift_cm;
    standin_pick pk = {2, STANDIN_AT_EDGE, NAN};
    double v3[3];
    eval_percent(c, q, d3, app3, 3, prepared && d - shift_cm >= 0, prepared && app3[1] >= 0,
                 &pk, v3);
    shifted[0] = v3[0];
    shifted[1] = v3[1];
    /* sl_curves_eval_query's stand-in, with the full evaluation of the
     * chosen candidate only and the others' flags */
    eval_how how = {q->mode};
    unsigned given = q->mode == SL_EVAL_POINTS ? SL_MF_POINTS_MODE : 0, others = 0;
    bool app_ok = isfinite(app) && app >= 0;
    if (pk.winner != STANDIN_AT_EDGE)
        others |= set_flags(c, depth, d, q);
    if (app_ok && pk.winner != STANDIN_AT_APPLICATOR)
        others |= set_flags(c, depth, app, q);
    for (size_t k = 0; k < c->nmembers; k++)
        if (pk.winner != STANDIN_MEMBER + k)
            others |= set_flags(c->members[k].set, depth, d, q);
    *out = zero_value;
    if (pk.winner == STANDIN_AT_EDGE) {
        out->depth_used_cm = depth;
        out->flags = given;
        eval_set(c, depth, d, q->angle_deg, q->tilt_deg, q->ssd_cm, how, q->electron_t, out);
    } else if (pk.winner == STANDIN_AT_APPLICATOR) {
        eval_set(c, depth, app, q->angle_deg, q->tilt_deg, q->ssd_cm, how, q->electron_t, out);
    } else {
        const member *mb = &c->members[pk.winner - STANDIN_MEMBER];
        eval_set(mb->set, depth, d, q->angle_deg, q->tilt_deg, q->ssd_cm, how, q->electron_t,
                 out);
        scale_value(out, mb->scale);
    }
    out->flags |= given | others | SL_MF_OPEN_FOR_CUTOUT;
    out->u_standin = 0.5 * (out->percent - pk.lo);
    combine(c, d, out);
}

void sl_curves_eval(const sl_curve_set *c, double depth, double d, sl_eval_mode mode,
                    double electron_t, sl_model_value *out)
{
    sl_eval_query q = {depth, d, NAN, NAN, mode, electron_t, 0, NAN};
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
    sl_eval_query q = {depth_cm, distance_cm, NAN, NAN, mode, 1.0, 0, NAN};
    return sl_model_eval_query(m, energy_mev, applicator, insert, &q, out, err);
}
