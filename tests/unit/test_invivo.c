/*
 * Unit tests of the in-vivo module: the readings file (paths relative to
 * it, an absent energy correction kept absent, the diode rule), the
 * statistics against values worked by hand with the published critical
 * values of Student's t and chi-square (NIST/SEMATECH e-Handbook of
 * Statistical Methods, sections 1.3.6.7.2 and 1.3.6.7.4), grouping by
 * band, and the proposal's rule (fewer than 5 readings keep the band).
 */
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#include "check_main.h"
#include "strayline/invivo.h"

static sl_log_reading mk(const char *energy, double dist, double r, double u)
{
    sl_log_reading x;
    memset(&x, 0, sizeof x);
    x.machine = "M";
    x.energy = (char *)energy;
    x.applicator = "A10";
    x.date = "2026-03-02";
    x.energy_mev = atof(energy);
    x.distance_cm = dist;
    x.log_ratio = r;
    x.u_log_ratio = u;
    x.estimate_cgy = 10;
    x.measured_cgy = 10 * exp(r);
    x.u_measured_cgy = 0.016 * x.measured_cgy;
    x.u_transfer_cgy = 2.5;
    x.flagged = fabs(r) > 2 * u;
    return x;
}

static const sl_transfer_band bands[] = {{5, 0.25}, {15, 0.4}, {INFINITY, 1.0}};

START_TEST(statistics_by_hand)
{
    /* four log ratios: mean 0.125, SD sqrt(0.021875 * 4 / 3) = 0.170783 */
    sl_log_reading r[] = {mk("9", 2, 0.1, 0.1), mk("9", 3, 0.3, 0.1), mk("9", 1, -0.1, 0.1),
                          mk("9", 4, 0.2, 0.1)};
    sl_log_readings rs = {4, r};
    sl_transfer t = {3, (sl_transfer_band *)bands, NULL, NULL, false};
    sl_invivo_stats *s = NULL;
    sl_error err = {0};
    ck_assert_int_eq(sl_invivo_statistics(&rs, &t, &s, &err), SL_OK);
    ck_assert_uint_eq(s->ngroups, 1);
    const sl_invivo_group *g = &s->groups[0];
    ck_assert_uint_eq(g->n, 4);
    ck_assert_double_eq_tol(g->mean_log_ratio, 0.125, 1e-12);
    double sd = sqrt(0.0875 / 3);
    ck_assert_double_eq_tol(g->sd_log_ratio, sd, 1e-12);
    /* t(0.975, 3) = 3.182 (NIST/SEMATECH table of the t distribution) */
    ck_assert_double_eq_tol(g->ci_hi - g->mean_log_ratio, 3.182 * sd / 2, 1e-3 * sd);
    /* chi-square(0.025, 3) = 0.216, chi-square(0.975, 3) = 9.348 (NIST/SEMATECH table) */
    ck_assert_double_eq_tol(g->sd_lo, sd * sqrt(3 / 9.348), 1e-3 * sd);
    ck_assert_double_eq_tol(g->sd_hi, sd * sqrt(3 / 0.216), 3e-3 * sd);
    /* chi-square of the spread: 0.0875 / 0.01 = 8.75 on 3 degrees of freedom */
    ck_assert_double_eq_tol(g->chi2, 8.75, 1e-9);
    ck_assert(g->p_spread < 0.05 && g->p_spread > 0.025); /* between the 0.95 and 0.975 points */
    ck_assert_double_eq_tol(g->extra_sd, sqrt(0.0875 / 3 - 0.01), 1e-12);
    ck_assert_str_eq(s->first_date, "2026-03-02");
    sl_invivo_stats_free(s);
}
END_TEST

START_TEST(groups_by_energy_and_band)
{
    sl_log_reading r[] = {mk("9", 2, 0.1, 0.1), mk("12", 3, 0.3, 0.1), mk("9", 7, -0.1, 0.1),
                          mk("9", 40, 0.2, 0.1), mk("9", 4.99, 0.0, 0.1)};
    sl_log_readings rs = {5, r};
    sl_transfer t = {3, (sl_transfer_band *)bands, NULL, NULL, false};
    sl_invivo_stats *s = NULL;
    sl_error err = {0};
    ck_assert_int_eq(sl_invivo_statistics(&rs, &t, &s, &err), SL_OK);
    ck_assert_uint_eq(s->ngroups, 4);
    /* 9 MeV before 12 MeV (numerically), bands in order */
    ck_assert_str_eq(s->groups[0].energy, "9");
    ck_assert_uint_eq(s->groups[0].n, 2);
    ck_assert_double_eq(s->groups[1].band_lo_cm, 5);
    ck_assert(isinf(s->groups[2].band_hi_cm));
    ck_assert_str_eq(s->groups[3].energy, "12");
    ck_assert(isnan(s->groups[3].sd_log_ratio)); /* one reading: no spread */
    sl_invivo_stats_free(s);
}
END_TEST

START_TEST(proposal_keeps_thin_bands)
{
    sl_model m;
    memset(&m, 0, sizeof m);
    m.machine.name = "M";
    sl_transfer_band b[3];
    memcpy(b, bands, sizeof b);
    m.machine.transfer = (sl_transfer){3, b, "x", "common practice", false};
    double lr[] = {0.2, -0.1, 0.15, -0.25, 0.05};
    sl_log_reading r[9];
    for (int i = 0; i < 5; i++)
        r[i] = mk("9", 2, lr[i], 0.3);
    for (int i = 5; i < 9; i++)
        r[i] = mk("9", 8, 0.9, 0.3); /* four readings only in 5 to 15 cm */
    sl_log_readings rs = {9, r};
    sl_invivo_proposal *p = NULL;
    sl_error err = {0};
    ck_assert_int_eq(sl_invivo_propose(&m, &rs, &p, &err), SL_OK);
    ck_assert_uint_eq(p->n[0], 5);
    ck_assert_uint_eq(p->n[1], 4);
    double s2 = 0.04 + 0.01 + 0.0225 + 0.0625 + 0.0025;
    /* chi-square(0.05, 5) = 1.145 (NIST/SEMATECH table, lower tail) */
    double upper = sqrt(s2 / 1.145);
    ck_assert_double_eq_tol(p->upper[0], upper, 1e-3 * upper);
    ck_assert_double_eq_tol(p->new_rel[0], sqrt(p->upper[0] * p->upper[0] - 0.016 * 0.016),
                            1e-12);
    ck_assert_double_eq(p->new_rel[1], 0.4);
    ck_assert_double_eq(p->new_rel[2], 1.0);
    ck_assert_uint_eq(p->nreadings, 9);
    sl_invivo_proposal_free(p);
    /* another machine's readings are not evidence */
    m.machine.name = "OTHER";
    ck_assert_int_eq(sl_invivo_propose(&m, &rs, &p, &err), SL_EINPUT);
    ck_assert_ptr_nonnull(strstr(err.msg, "no in-vivo reading of machine 'OTHER'"));
}
END_TEST

static char *write_tmp(const char *dir, const char *name, const char *text)
{
    char *p = malloc(strlen(dir) + strlen(name) + 2);
    sprintf(p, "%s/%s", dir, name);
    FILE *f = fopen(p, "w");
    ck_assert_ptr_nonnull(f);
    fputs(text, f);
    fclose(f);
    return p;
}

START_TEST(readings_file)
{
    char dir[] = "/tmp/sl-invivo-XXXXXX";
    ck_assert_ptr_nonnull(mkdtemp(dir));
    static const char head[] = "format: strayline-invivo-readings\nformat_version: 1\nreadings:\n";
    char text[2048];
    snprintf(text, sizeof text,
             "%s  - id: A\n    patient_id: P\n    plan: sub/plan.dcm\n    structure_set: ss.dcm\n"
             "    date: 2026-03-02\n    position: {name: X, kind: lens, point_cm: [1, 2, 3]}\n"
             "    fractions: 2\n    detector: TLD\n    reading_cgy: 3.5\n"
             "    energy_correction: none\n    added_uncertainty_percent: 4\n",
             head);
    char *path = write_tmp(dir, "r.yaml", text);
    sl_readings *rs = NULL;
    sl_error err = {0};
    ck_assert_int_eq(sl_readings_load(path, &rs, &err), SL_OK);
    ck_assert_uint_eq(rs->n, 1);
    const sl_reading *r = &rs->r[0];
    char want[256];
    snprintf(want, sizeof want, "%s/sub/plan.dcm", dir);
    ck_assert_str_eq(r->plan_path, want);
    ck_assert(isnan(r->energy_correction));
    ck_assert_int_eq(r->pos, SL_POS_POINT);
    ck_assert_double_eq(r->point_mm[2], 30);
    ck_assert_double_eq(r->u_detector, SL_INVIVO_U_TLD);
    ck_assert_double_eq_tol(r->u_added, 0.04, 1e-15);
    sl_readings_free(rs);
    unlink(path);
    free(path);
    /* a diode states its own uncertainty */
    snprintf(text, sizeof text,
             "%s  - id: A\n    patient_id: P\n    plan_uid: 1.2\n    date: 2026-03-02\n"
             "    position: {roi: Lens}\n    fractions: 1\n    detector: diode\n"
             "    reading_cgy: 3.5\n    energy_correction: 0.9\n",
             head);
    path = write_tmp(dir, "d.yaml", text);
    ck_assert_int_eq(sl_readings_load(path, &rs, &err), SL_EINPUT);
    ck_assert_ptr_nonnull(strstr(err.msg, "a diode needs detector_uncertainty_percent"));
    ck_assert_ptr_nonnull(strstr(err.msg, path));
    unlink(path);
    free(path);
    rmdir(dir);
}
END_TEST

static Suite *suite(void)
{
    Suite *s = suite_create("invivo");
    TCase *tc = tcase_create("invivo");
    tcase_add_test(tc, statistics_by_hand);
    tcase_add_test(tc, groups_by_energy_and_band);
    tcase_add_test(tc, proposal_keeps_thin_bands);
    tcase_add_test(tc, readings_file);
    suite_add_tcase(s, tc);
    return s;
}

SL_CHECK_MAIN(suite)
