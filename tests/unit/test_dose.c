/*
 * Unit tests of the dose statistics: the near-maximum's sample
 * (sl_dose_nearmax_sample) against its definition taken literally, every
 * sample sorted hottest first (a stable sort) and their volumes summed in
 * that order until they hold the near-maximum's volume, on invented random
 * doses with ties, volumes of many sizes, and volumes that are never held.
 */
#include <math.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "check_main.h"
#include "strayline/dose.h"

typedef struct pair {
    double d;
    size_t i;
} pair;

static int hotter_first(const void *a, const void *b)
{
    const pair *x = a, *y = b;
    if (x->d != y->d)
        return x->d > y->d ? -1 : 1;
    return x->i < y->i ? -1 : x->i > y->i;
}

/* the definition, literally */
static size_t by_sorting(const double *d, const double *w, size_t n, double volume)
{
    pair *p = malloc(n * sizeof *p);
    ck_assert_ptr_nonnull(p);
    for (size_t i = 0; i < n; i++)
        p[i] = (pair){d[i], i};
    qsort(p, n, sizeof *p, hotter_first);
    double acc = 0;
    size_t at = p[0].i;
    for (size_t k = 0; k < n; k++) {
        acc += w ? w[p[k].i] : 0;
        at = p[k].i;
        if (acc >= volume)
            break;
    }
    free(p);
    return at;
}

static uint64_t rng = 88172645463325252u;
static double uniform(void) /* xorshift64 */
{
    rng ^= rng << 13;
    rng ^= rng >> 7;
    rng ^= rng << 17;
    return (double)(rng >> 11) / 9007199254740992.0;
}

START_TEST(nearmax_sample_is_its_definition)
{
    size_t ncase = 0, nheld = 0, nnot = 0;
    for (int c = 0; c < 400; c++) {
        size_t n = 1 + (size_t)(uniform() * (c % 4 == 0 ? 20 : 3000));
        double *d = malloc(n * sizeof *d), *w = malloc(n * sizeof *w);
        double *scratch = malloc(2 * n * sizeof *scratch);
        ck_assert(d && w && scratch);
        int levels = c % 3 == 0 ? 5 : 0; /* many ties, or almost none */
        double total = 0, wsize = c % 5 == 0 ? 1e-4 : c % 5 == 1 ? 0.125 : 0.01;
        for (size_t i = 0; i < n; i++) {
            double u = uniform() * 100;
            d[i] = levels ? floor(u / (100.0 / levels)) : u;
            w[i] = wsize * (0.5 + uniform());
            total += w[i];
        }
        /* the near-maximum's volume, a tiny one, the whole, and more */
        const double volumes[] = {fmin(0.03, 0.02 * total), 1e-9, total * 0.5, total,
                                  total * 1.5, w[0]};
        for (size_t v = 0; v < sizeof volumes / sizeof *volumes; v++) {
            size_t want = by_sorting(d, w, n, volumes[v]);
            size_t got = sl_dose_nearmax_sample(d, w, n, volumes[v], scratch);
            ck_assert_msg(got == want, "case %d, n %zu, volume %g: sample %zu, not %zu", c, n,
                          volumes[v], got, want);
            if (volumes[v] <= total)
                nheld++;
            else
                nnot++;
            ncase++;
        }
        /* a point: the hottest */
        ck_assert_uint_eq(sl_dose_nearmax_sample(d, NULL, n, 0, scratch),
                          by_sorting(d, NULL, n, 0));
        /* volumes that are no volume: as the definition has them (the
         * coldest for NaN, the hottest below 0), never a read of nothing */
        const double odd[] = {NAN, -1};
        for (size_t v = 0; v < 2; v++)
            ck_assert_uint_eq(sl_dose_nearmax_sample(d, w, n, odd[v], scratch),
                              by_sorting(d, w, n, odd[v]));
        if (c % 50 == 0) { /* a sample's volume that is not a number */
            w[n / 2] = NAN;
            ck_assert_uint_eq(sl_dose_nearmax_sample(d, w, n, volumes[0], scratch),
                              by_sorting(d, w, n, volumes[0]));
        }
        free(d);
        free(w);
        free(scratch);
    }
    ck_assert_uint_eq(ncase, 400 * 6);
    ck_assert_uint_gt(nheld, 0);
    ck_assert_uint_gt(nnot, 0);
}
END_TEST

static Suite *dose_suite(void)
{
    Suite *s = suite_create("dose");
    TCase *tc = tcase_create("dose");
    tcase_set_timeout(tc, 120);
    tcase_add_test(tc, nearmax_sample_is_its_definition);
    suite_add_tcase(s, tc);
    return s;
}

SL_CHECK_MAIN(dose_suite)
