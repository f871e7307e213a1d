/*
 * Unit tests of commissioning: profile CSV reading and edge finding, the
 * profile fit on noise-free data of known parameters, the model file round
 * trip (write, read, identical evaluation), evaluation rules and the dose-alone
 * evaluation against the full one.
 */
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#include "check_main.h"
#include "strayline/measure.h"
#include "strayline/model.h"
#include "strayline/profile.h"

/* A through-field profile flat at 100 % inside |x| < 4 cm and falling
 * linearly to 0 at |x| = 6 cm: its 50 % points are exactly -5 and +5, and
 * linear interpolation between samples finds them exactly. */
START_TEST(edges_of_an_analytic_profile)
{
    double x[200], d[200];
    size_t n = 0;
    for (double v = -9.1; v <= 9.1; v += 0.3) {
        x[n] = v;
        double a = fabs(v);
        d[n] = a < 4 ? 100 : a < 6 ? 100 * (6 - a) / 2 : 0.5;
        n++;
    }
    double l, r;
    sl_error e = {0};
    ck_assert_int_eq(sl_find_edges(x, d, n, "analytic", &l, &r, NULL, &e), SL_OK);
    ck_assert_double_eq_tol(l, -5, 1e-12);
    ck_assert_double_eq_tol(r, 5, 1e-12);
    /* the edge is half the axis dose at that depth, not 50 % of the maximum */
    for (size_t i = 0; i < n; i++)
        d[i] *= 0.8;
    ck_assert_int_eq(sl_find_edges(x, d, n, "scaled", &l, &r, NULL, &e), SL_OK);
    ck_assert_double_eq_tol(r - l, 10, 1e-12);
    /* no crossing on one side */
    for (size_t i = 0; i < n; i++)
        if (x[i] > 0)
            d[i] = 80;
    ck_assert_int_eq(sl_find_edges(x, d, n, "one-sided", &l, &r, NULL, &e), SL_EINPUT);
    ck_assert_ptr_nonnull(strstr(e.msg, "no 50 % crossing on the positive side"));
}
END_TEST

static sl_status parse(const char *csv, double cax, sl_profile_data *p, sl_error *e)
{
    memset(p, 0, sizeof *p);
    p->rel_uncertainty = 0.02;
    p->floor_percent = 0.01;
    return sl_profile_parse_csv(csv, strlen(csv), "p.csv", cax, 10.0, p, NULL, e);
}

START_TEST(csv_reading_and_its_errors)
{
    sl_profile_data p;
    sl_error e = {0};
    const char *good = "edge_distance_cm,dose_percent\n0,50\n1,20\n2,8\n4,3\n8,1.5\n12,1\n";
    ck_assert_int_eq(parse(good, NAN, &p, &e), SL_OK);
    ck_assert_uint_eq(p.n, 6);
    ck_assert_double_eq(p.dose_percent[2], 8);
    /* sigma = sqrt((0.02 D)^2 + 0.01^2) */
    ck_assert_double_eq_tol(p.sigma_percent[0], sqrt(1.0 + 1e-4), 1e-12);
    sl_profile_data_free(&p);
    /* raw readings with a stated central-axis reading */
    const char *raw = "edge_distance_cm,reading\n0,1.0\n1,0.4\n2,0.16\n4,0.06\n8,0.03\n12,0.02\n";
    ck_assert_int_eq(parse(raw, 2.0, &p, &e), SL_OK);
    ck_assert_double_eq_tol(p.dose_percent[0], 50, 1e-12);
    sl_profile_data_free(&p);
    struct {
        const char *csv;
        double cax;
        const char *fragment;
    } bad[] = {
        {"edge_distance_cm\n0\n1\n", NAN, "the header must name two columns"},
        {"distance,dose_percent\n0,1\n", NAN, "first column 'distance'"},
        {"edge_distance_cm,dose\n0,1\n", NAN, "second column 'dose'"},
        {"edge_distance_cm,dose_percent\n0,50\n1,abc\n2,8\n4,3\n8,1.5\n12,1\n", NAN,
         "line 3: 'abc' is not a finite number"},
        {"edge_distance_cm,dose_percent\n0,50\n2,20\n1,8\n4,3\n8,1.5\n12,1\n", NAN,
         "line 4: edge_distance_cm 1 does not increase"},
        {"edge_distance_cm,dose_percent\n0,50\n", NAN, "1 data rows; a profile needs at least"},
        /* blank lines hold no record: the message names the file's line */
        {"edge_distance_cm,dose_percent\n\n0,50\n\n1,abc\n2,8\n4,3\n8,1.5\n12,1\n", NAN,
         "line 5: 'abc' is not a finite number"},
        {"edge_distance_cm,dose_percent\n0,50\n1,20,7\n", NAN, "more than two values"},
        {"edge_distance_cm,reading\n0,1\n1,1\n2,1\n3,1\n4,1\n5,1\n", NAN, "gives no cax_reading"},
        {"edge_distance_cm,dose_percent\n0,50\n1,0\n2,8\n4,3\n8,1.5\n12,1\n", NAN,
         "a dose of 0 outside the field"},
        {"off_axis_cm,dose_percent\n-6,100\n-3,100\n0,100\n3,100\n6,100\n9,100\n", NAN,
         "no 50 % crossing"},
        {"", NAN, "empty file"},
        {"edge_distance_cm,dose_percent\n0,nan\n", NAN, "'nan' is not a finite number"},
    };
    for (size_t i = 0; i < sizeof bad / sizeof *bad; i++) {
        sl_status st = parse(bad[i].csv, bad[i].cax, &p, &e);
        ck_assert_msg(st == SL_EINPUT, "case %zu accepted", i);
        ck_assert_msg(strstr(e.msg, bad[i].fragment) != NULL, "case %zu: '%s' lacks '%s'", i,
                      e.msg, bad[i].fragment);
        ck_assert_msg(strncmp(e.msg, "p.csv", 5) == 0, "case %zu: message must name the file", i);
        sl_profile_data_free(&p);
    }
}
END_TEST

/* Noise-free data of a known peaked profile, with 2 % uncertainties: the fit
 * must return the parameters it was made from, and choose the peaked form. */
/* The mirror rule (models/README.md): a tilted through-field profile keeps
 * one side; each side's first point outside its 50 % edge is that side's
 * own (an asymmetric invented profile: 2 % on the positive side, 4 % on the
 * negative one, so a mixed-up side shows); untilted, the two merge, and
 * where they differ this much the hotter is kept. */
START_TEST(tilted_through_field_profile_keeps_one_side)
{
    char csv[4096];
    size_t len = (size_t)snprintf(csv, sizeof csv, "off_axis_cm,dose_percent\n");
    for (int i = -40; i <= 40; i++) {
        double x = i * 0.5, ax = fabs(x);
        double d = ax < 4.5 ? 100 : ax < 5.5 ? 100 * (5.5 - ax)
                 : (x > 0 ? 2.0 : 4.0) * exp(-(ax - 5.5) / 3.0);
        len += (size_t)snprintf(csv + len, sizeof csv - len, "%g,%g\n", x, d);
    }
    sl_error e = {0};
    for (int side = -1; side <= 1; side++) {
        sl_profile_data p;
        memset(&p, 0, sizeof p);
        p.rel_uncertainty = 0.02;
        p.floor_percent = 0.01;
        p.side = side;
        ck_assert_int_eq(sl_profile_parse_csv(csv, len, "t.csv", NAN, 10.0, &p, NULL, &e), SL_OK);
        /* the 50 % edges at +/-5 cm; outside them 31 points a side from 0.5 cm */
        ck_assert_uint_eq(p.n, 30);
        ck_assert_double_eq_tol(p.distance_cm[0], 0.5, 1e-9);
        /* merged, the sides (2 and 4 %, far more than 3 standard deviations
         * of a difference apart) keep the hotter */
        double want = side > 0 ? 2.0 : 4.0;
        ck_assert_double_eq_tol(p.dose_percent[0], want, 1e-9);
        sl_profile_data_free(&p);
    }
}
END_TEST

START_TEST(fit_recovers_known_parameters)
{
    const double truth[7] = {40, 0.8, 1.8, 14, 2.5, 4.0, 1.5};
    double d[60], y[60], s[60];
    size_t n = 0;
    for (double x = 0; x <= 25.001; x += (x < 6 ? 0.25 : 1.0)) {
        d[n] = x;
        y[n] = sl_profile_value(SL_FORM_PEAKED, truth, x, NULL, NULL, NULL);
        s[n] = 0.02 * y[n];
        n++;
    }
    sl_profile_fit f;
    sl_error e = {0};
    ck_assert_int_eq(sl_profile_fit_data(d, y, s, n, "synthetic", &f, &e), SL_OK);
    ck_assert_int_eq(f.form, SL_FORM_PEAKED);
    for (int i = 0; i < 7; i++)
        ck_assert_msg(fabs(f.theta[i] - truth[i]) < 1e-5 * truth[i], "parameter %d: %g vs %g", i,
                      f.theta[i], truth[i]);
    ck_assert(f.chi2 < 1e-8);
    /* and a smooth profile stays smooth */
    const double smooth[4] = {45, 0.6, 1.2, 11};
    for (size_t i = 0; i < n; i++) {
        y[i] = sl_profile_value(SL_FORM_SMOOTH, smooth, d[i], NULL, NULL, NULL);
        s[i] = 0.02 * y[i];
    }
    ck_assert_int_eq(sl_profile_fit_data(d, y, s, n, "synthetic", &f, &e), SL_OK);
    ck_assert_int_eq(f.form, SL_FORM_SMOOTH);
    for (int i = 0; i < 4; i++)
        ck_assert_double_eq_tol(f.theta[i], smooth[i], 1e-5 * smooth[i]);
    /* electron and photon parts add up */
    double el, ph;
    double v = sl_profile_value(SL_FORM_SMOOTH, smooth, 3, NULL, &el, &ph);
    ck_assert_double_eq_tol(el + ph, v, 1e-12);
    ck_assert_double_eq_tol(ph, 1.2 * exp(-3 / 11.0), 1e-12);
}
END_TEST

static const char *demo_model(void)
{
    static char path[1024];
    snprintf(path, sizeof path, "%s/models/demo-e1.yaml", sl_test_source_root());
    return path;
}

START_TEST(model_round_trip_is_exact)
{
    sl_model *a, *b;
    sl_error e = {0};
    ck_assert_int_eq(sl_model_load(demo_model(), &a, &e), SL_OK);
    char path[] = "/tmp/sl_model_XXXXXX";
    int fd = mkstemp(path);
    FILE *fp = fdopen(fd, "w");
    ck_assert_int_eq(sl_model_write(a, fp, &e), SL_OK);
    fclose(fp);
    ck_assert_int_eq(sl_model_load(path, &b, &e), SL_OK);
    unlink(path);
    ck_assert_uint_eq(a->nprofiles, b->nprofiles);
    for (size_t i = 0; i < a->nprofiles; i++) {
        ck_assert_mem_eq(a->profiles[i].fit.theta, b->profiles[i].fit.theta,
                         sizeof a->profiles[i].fit.theta);
        ck_assert_mem_eq(a->profiles[i].fit.covar, b->profiles[i].fit.covar,
                         sizeof a->profiles[i].fit.covar);
    }
    const double energies[] = {6, 9, 12, 16, 20};
    const char *apps[] = {"A06", "A10", "A25"};
    for (int k = 0; k < 5; k++)
        for (int j = 0; j < 3; j++)
            for (double depth = 0; depth <= 3; depth += 0.35)
                for (double dist = 0; dist < 30; dist += 0.7) {
                    sl_model_value va, vb;
                    ck_assert_int_eq(sl_model_eval(a, energies[k], apps[j], NULL, depth, dist,
                                                   SL_EVAL_FIT, &va, &e),
                                     SL_OK);
                    ck_assert_int_eq(sl_model_eval(b, energies[k], apps[j], NULL, depth, dist,
                                                   SL_EVAL_FIT, &vb, &e),
                                     SL_OK);
                    ck_assert(va.percent == vb.percent && va.u_percent == vb.u_percent &&
                              va.flags == vb.flags);
                }
    sl_model_free(a);
    sl_model_free(b);
}
END_TEST

START_TEST(evaluation_refuses_what_is_not_commissioned)
{
    sl_model *m;
    sl_error e = {0};
    ck_assert_int_eq(sl_model_load(demo_model(), &m, &e), SL_OK);
    sl_model_value v;
    ck_assert_int_eq(sl_model_eval(m, 10, "A10", NULL, 1, 3, SL_EVAL_FIT, &v, &e), SL_EINPUT);
    ck_assert_ptr_nonnull(strstr(e.msg, "not commissioned"));
    ck_assert_ptr_nonnull(strstr(e.msg, "9 MeV/A10"));
    /* once, though the machine lists two outputs (SSD 100 and 110) for it */
    ck_assert_ptr_null(strstr(strstr(e.msg, "9 MeV/A10") + 1, "9 MeV/A10"));
    ck_assert_int_eq(sl_model_eval(m, 9, "A12", NULL, 1, 3, SL_EVAL_FIT, &v, &e), SL_EINPUT);
    ck_assert_int_eq(sl_model_eval(m, 9, "A10", NULL, 1, -0.5, SL_EVAL_FIT, &v, &e), SL_OK);
    ck_assert(v.flags & SL_MF_IN_FIELD);
    ck_assert(isnan(v.percent));
    ck_assert_int_eq(sl_model_eval(m, 9, "A10", "C6", 1, 3, SL_EVAL_FIT, &v, &e), SL_OK);
    ck_assert(!(v.flags & SL_MF_OPEN_FOR_CUTOUT)); /* C6 is commissioned in A10 */
    ck_assert_int_eq(sl_model_eval(m, 9, "A10", "CUSTOM", 1, 3, SL_EVAL_FIT, &v, &e), SL_OK);
    ck_assert(v.flags & SL_MF_OPEN_FOR_CUTOUT);
    sl_model_free(m);
}
END_TEST

/* An in-vivo scale (models/README.md, invivo_scales): the value and every
 * component times the factor, the scale's relative uncertainty (half its
 * 95 % interval) joined to the transfer component in quadrature, the value
 * marked; below 1 the upper bound (k = 2) stays at the unscaled value (the
 * project's conservative rule); written and read back exactly. Checked by
 * hand arithmetic (hypot, products). */
static void add_scale(sl_model *m, double e, const char *app, double f, double lo, double hi)
{
    sl_model_scale *ns = realloc(m->scales, (m->nscales + 1) * sizeof *ns);
    ck_assert_ptr_nonnull(ns);
    m->scales = ns;
    sl_model_scale *s = &m->scales[m->nscales++];
    memset(s, 0, sizeof *s);
    s->energy_mev = e;
    s->applicator = strdup(app);
    s->factor = f;
    s->readings = 9;
    s->first_date = strdup("2026-03-01");
    s->last_date = strdup("2026-03-09");
    s->mean_log_ratio = log(f);
    s->ci_lo = lo;
    s->ci_hi = hi;
    s->p_value = 0.003;
    s->source = strdup("invented test evidence");
}

START_TEST(invivo_scale_applied_and_round_tripped)
{
    sl_model *m, *b;
    sl_error e = {0};
    ck_assert_int_eq(sl_model_load(demo_model(), &m, &e), SL_OK);
    sl_model_value v0, v1, c0, c1;
    ck_assert_int_eq(sl_model_eval(m, 9, "A10", NULL, 1, 6, SL_EVAL_FIT, &v0, &e), SL_OK);
    ck_assert_int_eq(sl_model_eval(m, 9, "A10", "CUSTOM", 1, 6, SL_EVAL_FIT, &c0, &e), SL_OK);
    add_scale(m, 9, "A10", 1.3, log(1.3) - 0.06, log(1.3) + 0.06);
    ck_assert_int_eq(sl_model_eval(m, 9, "A10", NULL, 1, 6, SL_EVAL_FIT, &v1, &e), SL_OK);
    ck_assert_double_eq_tol(v1.percent, 1.3 * v0.percent, 1e-12 * v0.percent);
    ck_assert_double_eq_tol(v1.u_fit, 1.3 * v0.u_fit, 1e-12 * v0.percent);
    ck_assert_double_eq_tol(v1.u_meas, 1.3 * v0.u_meas, 1e-12 * v0.percent);
    double rel = v0.u_transfer / v0.percent;
    ck_assert_double_eq_tol(v1.u_transfer, hypot(rel, 0.06) * v1.percent, 1e-9 * v1.percent);
    ck_assert(v1.flags & SL_MF_INVIVO_SCALED);
    ck_assert(!(v0.flags & SL_MF_INVIVO_SCALED));
    ck_assert_double_eq(v1.scale, 1.3);
    ck_assert_double_eq(v0.scale, 1.0);
    /* the stand-in of an uncommissioned cutout is scaled alike */
    ck_assert_int_eq(sl_model_eval(m, 9, "A10", "CUSTOM", 1, 6, SL_EVAL_FIT, &c1, &e), SL_OK);
    ck_assert_double_eq_tol(c1.percent, 1.3 * c0.percent, 1e-12 * c0.percent);
    /* another energy is untouched */
    ck_assert_int_eq(sl_model_eval(m, 12, "A10", NULL, 1, 6, SL_EVAL_FIT, &v1, &e), SL_OK);
    ck_assert(!(v1.flags & SL_MF_INVIVO_SCALED));
    /* below 1: the estimate drops, the upper bound does not drop below the unscaled value */
    add_scale(m, 6, "A10", 0.4, log(0.4) - 0.01, log(0.4) + 0.01);
    ck_assert_int_eq(sl_model_eval(m, 6, "A10", NULL, 1, 2, SL_EVAL_FIT, &v1, &e), SL_OK);
    free(m->scales[1].applicator);
    m->nscales--;
    ck_assert_int_eq(sl_model_eval(m, 6, "A10", NULL, 1, 2, SL_EVAL_FIT, &v0, &e), SL_OK);
    m->nscales++;
    m->scales[1].applicator = strdup("A10");
    ck_assert_double_eq_tol(v1.percent, 0.4 * v0.percent, 1e-12 * v0.percent);
    ck_assert(v1.percent + 2 * v1.u_percent >= v0.percent * (1 - 1e-12));
    /* in field: nothing to scale */
    ck_assert_int_eq(sl_model_eval(m, 9, "A10", NULL, 1, -1, SL_EVAL_FIT, &v1, &e), SL_OK);
    ck_assert(isnan(v1.percent) && v1.scale == 1.0);
    /* written and read back exactly */
    char path[] = "/tmp/sl_model_XXXXXX";
    int fd = mkstemp(path);
    FILE *fp = fdopen(fd, "w");
    ck_assert_int_eq(sl_model_write(m, fp, &e), SL_OK);
    fclose(fp);
    ck_assert_int_eq(sl_model_load(path, &b, &e), SL_OK);
    unlink(path);
    ck_assert_uint_eq(b->nscales, 2);
    for (size_t i = 0; i < 2; i++) {
        const sl_model_scale *x = &m->scales[i], *y = &b->scales[i];
        ck_assert(x->energy_mev == y->energy_mev && x->factor == y->factor &&
                  x->ci_lo == y->ci_lo && x->ci_hi == y->ci_hi && x->p_value == y->p_value &&
                  x->mean_log_ratio == y->mean_log_ratio && x->readings == y->readings);
        ck_assert_str_eq(x->applicator, y->applicator);
        ck_assert_str_eq(x->source, y->source);
        ck_assert_str_eq(x->first_date, y->first_date);
    }
    ck_assert_ptr_eq(sl_model_find_scale(b, 9, "A06"), NULL);
    ck_assert_ptr_nonnull(sl_model_find_scale(b, 9, "A10"));
    sl_model_free(m);
    sl_model_free(b);
}
END_TEST

/* sl_curves_eval_percent, the dose alone that the setup shift's neighbouring
 * evaluations take, is bitwise the percent of the full evaluation everywhere:
 * between and beyond the commissioned depths, distances, directions, tilts
 * and SSDs, unknown direction and tilt, both modes, a what-if shield, the
 * stand-in of an uncommissioned cutout (with and without the applicator's
 * distance) and an in-vivo scale; and sl_curves_eval_percent_shift, the
 * setup shift's two neighbours in one walk, is bitwise two single calls on
 * a set not prepared for the shift, with either distance in or out of
 * range, and on a prepared set (the nearer distance's exponentials from the
 * farther's) within 1e-13 relative of them, the farther bitwise; the
 * value of both at once (sl_curves_eval_query_shift) bitwise the full
 * evaluation's, or on a prepared set within 1e-13 of the dose. A
 * consistency check of paths through the same code; the values themselves
 * are checked elsewhere. */
/* A value's numeric fields in one array (the struct's padding aside). */
enum { NFIELDS = 15 };
static void value_fields(const sl_model_value *v, double f[NFIELDS])
{
    const double x[NFIELDS] = {v->percent, v->u_percent, v->u_fit, v->u_meas, v->u_interp,
                               v->u_extrap, v->u_standin, v->u_transfer, v->u_uncommissioned,
                               v->scale, v->electron_percent, v->photon_percent,
                               v->depth_used_cm, v->tilt_used_deg, v->ssd_used_cm};
    memcpy(f, x, sizeof x);
}

/* Every field of two values bitwise. */
static bool same_value(const sl_model_value *a, const sl_model_value *b)
{
    double x[NFIELDS], y[NFIELDS];
    value_fields(a, x);
    value_fields(b, y);
    return memcmp(x, y, sizeof x) == 0 && a->flags == b->flags;
}

/* Every field of two values within rel of the larger or of the dose (an
 * uncertainty component taken as a difference of doses rounds as they do),
 * the flags bitwise. */
static bool close_value(const sl_model_value *a, const sl_model_value *b, double rel)
{
    double x[NFIELDS], y[NFIELDS];
    value_fields(a, x);
    value_fields(b, y);
    for (size_t i = 0; i < NFIELDS; i++) {
        if (memcmp(&x[i], &y[i], sizeof x[i]) == 0)
            continue;
        double scale = fmax(fmax(fabs(x[i]), fabs(y[i])), fabs(a->percent));
        if (!(fabs(x[i] - y[i]) <= rel * scale))
            return false;
    }
    return a->flags == b->flags;
}

START_TEST(dose_alone_equals_the_full_evaluation)
{
    sl_model *m;
    sl_error e = {0};
    ck_assert_int_eq(sl_model_load(demo_model(), &m, &e), SL_OK);
    add_scale(m, 12, "A06", 0.8, log(0.8) - 0.05, log(0.8) + 0.05);
    const struct {
        double e;
        const char *app, *ins;
    } sets[] = {{9, "A10", NULL}, {9, "A10", "CUSTOM"}, {12, "A06", "CUSTOM"}, {6, "A06", "C4"}};
    const double depths[] = {-0.2, 0, 0.7, 1.54, 2.6, 8};
    const double dists[] = {-1, 0, 0.3, 2.2, 9.7, 24, 39.5, 52};
    const double angles[] = {NAN, 0, 30, 90};
    const double tilts[] = {NAN, -20, -7.5, 0, 12, 30};
    const double ssds[] = {NAN, 96, 100, 106, 110, 125};
    size_t n = 0, nshort = 0, nstandin = 0, nclose = 0;
    for (size_t k = 0; k < sizeof sets / sizeof *sets; k++) {
        sl_curve_set *c, *cp;
        unsigned fl;
        ck_assert_int_eq(sl_model_select(m, sets[k].e, sets[k].app, sets[k].ins, &c, &fl, &e),
                         SL_OK);
        ck_assert_int_eq(sl_model_select(m, sets[k].e, sets[k].app, sets[k].ins, &cp, &fl, &e),
                         SL_OK);
        sl_curves_prepare_shift(cp, 0.5);
        for (int mode = 0; mode < 2; mode++)
            for (size_t a = 0; a < sizeof depths / sizeof *depths; a++)
                for (size_t b = 0; b < sizeof dists / sizeof *dists; b++)
                    for (size_t g = 0; g < sizeof angles / sizeof *angles; g++)
                        for (size_t t = 0; t < sizeof tilts / sizeof *tilts; t++)
                            for (size_t s = 0; s < sizeof ssds / sizeof *ssds; s++) {
                                sl_eval_query q = {depths[a], dists[b],
                                                   (t + s) % 3 == 0   ? dists[b] + 1.5
                                                   : (t + s) % 3 == 1 ? dists[b] - 2.0
                                                                      : NAN,
                                                   angles[g],
                                                   mode ? SL_EVAL_POINTS : SL_EVAL_FIT,
                                                   (g + t) % 2 ? 0.3 : 1.0, tilts[t], ssds[s]};
                                sl_model_value v;
                                sl_curves_eval_query(c, &q, &v);
                                double p = sl_curves_eval_percent(c, &q);
                                ck_assert_msg(memcmp(&p, &v.percent, sizeof p) == 0,
                                              "set %zu, query %zu: %a != %a", k, n, p,
                                              v.percent);
                                /* the setup shift's pair, one walk for both */
                                const double pd[2] = {q.distance_cm + 0.5,
                                                      fmax(q.distance_cm - 0.5, 0)};
                                const double pa[2] = {q.app_distance_cm + 0.5,
                                                      q.app_distance_cm - 0.5};
                                double pair[2], linked[2];
                                sl_curves_eval_percent_shift(c, &q, 0.5, pair);
                                sl_curves_eval_percent_shift(cp, &q, 0.5, linked);
                                /* both at once: the same value, flags and pair,
                                 * a stand-in's chosen candidate alone in full;
                                 * on a prepared set a stand-in's candidates at
                                 * the query's own distance come from the pair's
                                 * exponentials, so that the spread between them
                                 * (u_standin) may differ in its last bits */
                                for (int pr = 0; pr < 2; pr++) {
                                    sl_model_value w;
                                    double two[2];
                                    sl_curves_eval_query_shift(pr ? cp : c, &q, 0.5, &w, two);
                                    bool exact = same_value(&v, &w);
                                    nclose += pr && !exact;
                                    ck_assert_msg(exact || (pr && close_value(&v, &w, 1e-13)),
                                                  "set %zu, query %zu: query_shift differs", k,
                                                  n);
                                    const double *ref = pr ? linked : pair;
                                    for (int i = 0; i < 2; i++)
                                        ck_assert_msg(memcmp(&two[i], &ref[i], sizeof two[i]) ==
                                                              0 ||
                                                          (pr && i == 1 &&
                                                           fabs(two[i] - ref[i]) <=
                                                               1e-13 * fabs(ref[i])),
                                                      "set %zu, query %zu: query_shift pair %d",
                                                      k, n, i);
                                    nstandin += pr == 0 && sets[k].ins != NULL &&
                                                (v.flags & SL_MF_OPEN_FOR_CUTOUT);
                                }
                                for (int i = 0; i < 2; i++) {
                                    sl_eval_query qi = q;
                                    qi.distance_cm = pd[i];
                                    qi.app_distance_cm = pa[i];
                                    double one = sl_curves_eval_percent(c, &qi);
                                    ck_assert_msg(memcmp(&one, &pair[i], sizeof one) == 0,
                                                  "set %zu, query %zu, pair %d: %a != %a", k,
                                                  n, i, pair[i], one);
                                    bool same = memcmp(&one, &linked[i], sizeof one) == 0;
                                    nshort += !same;
                                    /* neither of the nearer distances linked (the
                                     * field's clamped, the applicator's below
                                     * zero or unknown): bitwise */
                                    bool unlinked = q.distance_cm - 0.5 < 0 &&
                                                    !(q.app_distance_cm - 0.5 >= 0);
                                    ck_assert_msg(same || (i == 1 && !unlinked && isfinite(one) &&
                                                           fabs(linked[i] - one) <=
                                                               1e-13 * fabs(one)),
                                                  "set %zu, query %zu, prepared %d: %a != %a",
                                                  k, n, i, linked[i], one);
                                }
                                n++;
                            }
        sl_curve_set_free(c);
        sl_curve_set_free(cp);
    }
    ck_assert_uint_eq(n, 4 * 2 * 6 * 8 * 4 * 6 * 6);
    /* the prepared sets took the shortcut: some nearer distances differ in
     * their last bits */
    ck_assert_uint_gt(nshort, 0);
    /* and the stand-ins were among the queries, some of whose spreads on a
     * prepared set differ in their last bits */
    ck_assert_uint_gt(nstandin, 0);
    ck_assert_uint_gt(nclose, 0);
    sl_model_free(m);
}
END_TEST

/* sl_profile_value_three against three single evaluations: the farther
 * distance bitwise, the other two within 1e-13 relative (their exponentials
 * come from the farther's, a peaked form's nearer bump from the other two),
 * for both forms, near the bump and far beyond it (where the bump falls
 * below 1e-150 and is evaluated directly). */
START_TEST(three_distances_agree_with_single_evaluations)
{
    /* a, l1, c, l2, b, mu, s (invented parameters) */
    const double theta[SL_PROFILE_MAX_PARAMS] = {80, 1.3, 4, 25, 30, 3.2, 0.9};
    const double hs[] = {0.2, 0.5, 1.0};
    const double d0s[] = {0.5, 1.2, 3.2, 4.0, 7.5, 20, 45, 90};
    size_t n = 0;
    for (int form = 0; form < 2; form++) {
        sl_profile_form f = form ? SL_FORM_PEAKED : SL_FORM_SMOOTH;
        for (size_t a = 0; a < sizeof hs / sizeof *hs; a++)
            for (size_t b = 0; b < sizeof d0s / sizeof *d0s; b++) {
                double h = hs[a], k2[2], kh[2], gk;
                sl_profile_shift_factors(f, theta, h, k2, kh, &gk);
                const double d[3] = {d0s[b] + h, d0s[b] + h - 2 * h, d0s[b]};
                if (d[1] < 0)
                    continue;
                double v[3], el[3], ph[3];
                sl_profile_value_three(f, theta, d, k2, kh, gk, v, el, ph);
                for (int i = 0; i < 3; i++) {
                    double e1, p1;
                    double one = sl_profile_value(f, theta, d[i], NULL, &e1, &p1);
                    if (i == 0) {
                        ck_assert(memcmp(&one, &v[0], sizeof one) == 0);
                        ck_assert(memcmp(&e1, &el[0], sizeof e1) == 0);
                        ck_assert(memcmp(&p1, &ph[0], sizeof p1) == 0);
                    } else {
                        ck_assert_msg(fabs(v[i] - one) <= 1e-13 * one,
                                      "form %d, h %g, d %g: %a != %a", form, h, d[i], v[i], one);
                        ck_assert(fabs(el[i] - e1) <= 1e-13 * one);
                        ck_assert(fabs(ph[i] - p1) <= 1e-13 * one);
                    }
                    n++;
                }
            }
    }
    ck_assert_uint_eq(n, 3 * (2 * 3 * 8 - 1 * 2)); /* d = 0.5 with h = 1 is left out */
}
END_TEST

/* sl_curves_use_direction: the demo model's 9 MeV A10 open profiles have
 * an inplane direction beside the crossplane ones (at tilt 0, SSD 100), its
 * 9 MeV A06 ones are crossplane alone; where it says no, the direction
 * changes no evaluation. */
START_TEST(direction_used_only_where_profiles_differ_by_it)
{
    sl_model *m;
    sl_error e = {0};
    ck_assert_int_eq(sl_model_load(demo_model(), &m, &e), SL_OK);
    sl_curve_set *both, *one;
    unsigned fl;
    ck_assert_int_eq(sl_model_select(m, 9, "A10", NULL, &both, &fl, &e), SL_OK);
    ck_assert_int_eq(sl_model_select(m, 9, "A06", "CUSTOM", &one, &fl, &e), SL_OK);
    ck_assert(sl_curves_use_direction(both));
    ck_assert(!sl_curves_use_direction(one));
    const double angles[] = {NAN, 0, 30, 90};
    for (double d = 0.5; d < 30; d += 2.5) {
        sl_eval_query q = {1.0, d, d - 1.0, 0, SL_EVAL_FIT, 1.0, 5.0, NAN};
        sl_model_value v0;
        sl_curves_eval_query(one, &q, &v0);
        for (size_t a = 0; a < sizeof angles / sizeof *angles; a++) {
            q.angle_deg = angles[a];
            sl_model_value v;
            sl_curves_eval_query(one, &q, &v);
            ck_assert(same_value(&v, &v0));
        }
    }
    sl_curve_set_free(both);
    sl_curve_set_free(one);
    sl_model_free(m);
}
END_TEST

static Suite *model_suite(void)
{
    Suite *s = suite_create("model");
    TCase *tc = tcase_create("model");
    tcase_set_timeout(tc, 120);
    tcase_add_test(tc, edges_of_an_analytic_profile);
    tcase_add_test(tc, csv_reading_and_its_errors);
    tcase_add_test(tc, tilted_through_field_profile_keeps_one_side);
    tcase_add_test(tc, fit_recovers_known_parameters);
    tcase_add_test(tc, model_round_trip_is_exact);
    tcase_add_test(tc, evaluation_refuses_what_is_not_commissioned);
    tcase_add_test(tc, invivo_scale_applied_and_round_tripped);
    tcase_add_test(tc, dose_alone_equals_the_full_evaluation);
    tcase_add_test(tc, three_distances_agree_with_single_evaluations);
    tcase_add_test(tc, direction_used_only_where_profiles_differ_by_it);
    suite_add_tcase(s, tc);
    return s;
}

SL_CHECK_MAIN(model_suite)
