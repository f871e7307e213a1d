/*
 * Unit tests of the action-level table: ROI-name matching, the lifetime
 * risk table against BEIR VII Phase 2 Table 12D-1 (as copied into
 * models/action-levels.yaml, secondary), gestational-week ranges, and the
 * lead rule against its published sources.
 */
#include <math.h>
#include <stdio.h>
#include <string.h>

#include "check_main.h"
#include "strayline/levels.h"

static sl_levels *load(void)
{
    char path[1024];
    snprintf(path, sizeof path, "%s/models/action-levels.yaml", sl_test_source_root());
    sl_levels *l = NULL;
    sl_error e = {0};
    ck_assert_msg(sl_levels_load(path, &l, &e) == SL_OK, "%s", e.msg);
    return l;
}

START_TEST(roi_names_match_their_kinds)
{
    sl_levels *l = load();
    const struct {
        const char *name, *kind;
    } cases[] = {
        {"Lens_L", "lens"},          {"LENS R", "lens"},        {"lt lens", "lens"},
        {"Pacemaker", "cardiac_device"}, {"ICD", "cardiac_device"}, {"PPM", "cardiac_device"},
        {"Fetus", "fetus"},          {"Fetal_pole", "fetus"},   {"Thyroid", "thyroid"},
        {"Breast_R", "breast"},      {"Testis_L", "testis"},    {"Ovary_R", "ovary"},
        {"Bone_Marrow", "bone_marrow"}, {"Eye_L", NULL},        {"Heart", NULL},
        {"Parotid_L", NULL},
    };
    for (size_t i = 0; i < sizeof cases / sizeof *cases; i++) {
        const sl_kind *k = sl_levels_match(l, cases[i].name);
        if (!cases[i].kind)
            ck_assert_msg(k == NULL, "%s matched %s", cases[i].name, k ? k->kind : "");
        else
            ck_assert_msg(k && strcmp(k->kind, cases[i].kind) == 0, "%s: expected %s, got %s",
                          cases[i].name, cases[i].kind, k ? k->kind : "none");
    }
    const sl_kind *lens = sl_levels_kind(l, "lens");
    ck_assert_uint_eq(lens->nlevels, 1);
    /* ICRP Publication 118: 0.5 Gy */
    ck_assert_double_eq(lens->levels[0].dose_gy, 0.5);
    ck_assert_str_eq(lens->levels[0].mark, "published");
    sl_levels_free(l);
}
END_TEST

/* BEIR VII Phase 2 (2006), Table 12D-1, thyroid, females: 41 cases per
 * 100,000 at age 30 for 0.1 Gy, 14 at age 40 (secondary: a copied table). */
START_TEST(lifetime_risk_table)
{
    sl_levels *l = load();
    const sl_lar_table *t = sl_levels_table(l, "thyroid_incidence");
    ck_assert_ptr_nonnull(t);
    ck_assert_double_eq_tol(sl_lar_cases(t, 'F', 30, 0.1), 41, 1e-9);
    ck_assert_double_eq_tol(sl_lar_cases(t, 'F', 30, 0.2), 82, 1e-9);
    ck_assert_double_eq_tol(sl_lar_cases(t, 'F', 35, 0.1), (41 + 14) / 2.0, 1e-9);
    ck_assert_double_eq_tol(sl_lar_cases(t, 'M', 0, 0.1), 115, 1e-9);
    ck_assert(isnan(sl_lar_cases(t, 'F', 90, 0.1)));
    const sl_lar_table *b = sl_levels_table(l, "breast_incidence");
    ck_assert(isnan(sl_lar_cases(b, 'M', 40, 0.1))); /* female breast only */
    ck_assert_double_eq_tol(sl_lar_cases(b, 'F', 20, 0.1), 429, 1e-9);
    sl_levels_free(l);
}
END_TEST

START_TEST(gestational_weeks_are_half_open)
{
    ck_assert(sl_level_applies(NAN, NAN, NAN));
    ck_assert(sl_level_applies(2, 8, 2.0));
    ck_assert(sl_level_applies(2, 8, 7.99));
    ck_assert(!sl_level_applies(2, 8, 8.0));
    ck_assert(!sl_level_applies(2, 8, 1.99));
    ck_assert(!sl_level_applies(2, 8, NAN));
}
END_TEST

/* The lead that stops an electron beam is E/2 mm (Radiother Oncol 80:391,
 * 2006, published), plus about 1 mm (textbook rule, secondary); the 95 %
 * attenuation thickness measured at 7 MeV is 2.3 mm (Giarratano, Duerkes &
 * Almond, Med Phys 2:336, 1975, published). */
START_TEST(lead_rule)
{
    for (double e = 6; e <= 20; e += 1) {
        ck_assert_double_eq_tol(sl_lead_mm(e), e / 2 + 1, 1e-12);
        ck_assert(sl_lead_mm(e) >= e / 2);
        ck_assert_double_eq_tol(sl_alloy_mm(e), 1.2 * sl_lead_mm(e), 1e-12);
    }
    ck_assert(sl_lead_mm(7) >= 2.3);
}
END_TEST

START_TEST(bad_tables_are_refused)
{
    const struct {
        const char *yaml, *fragment;
    } bad[] = {
        {"format: strayline-action-levels\nformat_version: 1\nkinds:\n  - kind: lens\n    match: "
         "[lens]\n    levels:\n      - {name: x, dose_gy: 0.5, source: s, mark: guessed}\n",
         "mark 'guessed'"},
        {"format: strayline-action-levels\nformat_version: 1\nkinds:\n  - kind: lens\n    match: "
         "[]\n",
         "match: the list is empty"},
        {"format: strayline-action-levels\nformat_version: 1\nkinds:\n  - kind: lens\n    match: "
         "[lens]\n    levels:\n      - {name: x, dose_gy: -1, source: s, mark: published}\n",
         "dose_gy: -1"},
        {"format: strayline-action-levels\nformat_version: 1\nkinds:\n  - kind: f\n    match: "
         "[f]\n    levels:\n      - {name: x, dose_gy: 1, weeks: [8, 2], source: s, mark: "
         "published}\n",
         "weeks: expected [from, to]"},
        {"format: strayline-action-levels\nformat_version: 1\nkinds:\n  - kind: d\n    match: "
         "[d]\n    bands: {source: s, mark: published, list: [{name: a, below_gy: 5}, {name: b, "
         "below_gy: 2}, {name: c}]}\n",
         "the upper edges must increase"},
        {"format: strayline-action-levels\nformat_version: 1\nkinds:\n  - kind: t\n    match: "
         "[t]\n    lar_table: nothing\n",
         "lar_table 'nothing'"},
    };
    for (size_t i = 0; i < sizeof bad / sizeof *bad; i++) {
        sl_levels *l;
        sl_error e = {0};
        ck_assert_int_eq(sl_levels_load_buffer(bad[i].yaml, strlen(bad[i].yaml), "t.yaml", &l, &e),
                         SL_EINPUT);
        ck_assert_msg(strstr(e.msg, bad[i].fragment) != NULL, "case %zu: '%s'", i, e.msg);
    }
}
END_TEST

static Suite *levels_suite(void)
{
    Suite *s = suite_create("levels");
    TCase *tc = tcase_create("levels");
    tcase_add_test(tc, roi_names_match_their_kinds);
    tcase_add_test(tc, lifetime_risk_table);
    tcase_add_test(tc, gestational_weeks_are_half_open);
    tcase_add_test(tc, lead_rule);
    tcase_add_test(tc, bad_tables_are_refused);
    suite_add_tcase(s, tc);
    return s;
}

SL_CHECK_MAIN(levels_suite)
