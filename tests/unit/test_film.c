/*
 * Unit tests of the film module's pieces: TIFF reading against scans written
 * here with libtiff itself (strips and tiles, contiguous and separate
 * planes, grey and RGB, 8 and 16 bits, with and without resolution tags),
 * the robust region mean, the calibration forms' analytic gradients
 * against finite differences, and the triple-channel cell on exact readings
 * of a known thickness factor and dose.
 */
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#include <tiffio.h>

#include "check_main.h"
#include "strayline/film.h"
/* the triple-channel cell is the module's own (src/film/triple.c) */
#include "../../src/film/film_internal.h"

static char dir[64];

static const char *tmp_path(const char *name)
{
    static char p[160];
    if (!dir[0]) {
        strcpy(dir, "/tmp/sl-film-unit-XXXXXX");
        ck_assert_ptr_nonnull(mkdtemp(dir));
    }
    snprintf(p, sizeof p, "%s/%s", dir, name);
    return p;
}

/* The test pattern: value of channel c at (x, y). */
static unsigned pattern(int c, unsigned x, unsigned y, int bits)
{
    unsigned v = 1000u + 100u * x + 1000u * y + 7u * (unsigned)c;
    return bits == 16 ? v : v % 250 + 1;
}

typedef struct spec {
    unsigned w, h;
    int spp, bits;
    bool separate, tiled, res;
    double dpi;
} spec;

static void write_tiff(const char *path, spec s)
{
    TIFF *t = TIFFOpen(path, "w");
    ck_assert_ptr_nonnull(t);
    TIFFSetField(t, TIFFTAG_IMAGEWIDTH, s.w);
    TIFFSetField(t, TIFFTAG_IMAGELENGTH, s.h);
    TIFFSetField(t, TIFFTAG_BITSPERSAMPLE, s.bits);
    TIFFSetField(t, TIFFTAG_SAMPLESPERPIXEL, s.spp);
    TIFFSetField(t, TIFFTAG_PHOTOMETRIC, s.spp == 3 ? PHOTOMETRIC_RGB : PHOTOMETRIC_MINISBLACK);
    TIFFSetField(t, TIFFTAG_PLANARCONFIG, s.separate ? PLANARCONFIG_SEPARATE : PLANARCONFIG_CONTIG);
    TIFFSetField(t, TIFFTAG_COMPRESSION, COMPRESSION_ADOBE_DEFLATE);
    if (s.res) {
        TIFFSetField(t, TIFFTAG_XRESOLUTION, (float)s.dpi);
        TIFFSetField(t, TIFFTAG_YRESOLUTION, (float)s.dpi);
        TIFFSetField(t, TIFFTAG_RESOLUTIONUNIT, RESUNIT_INCH);
    }
    size_t bytes = (size_t)s.bits / 8;
    if (s.tiled) {
        TIFFSetField(t, TIFFTAG_TILEWIDTH, 16);
        TIFFSetField(t, TIFFTAG_TILELENGTH, 16);
        unsigned char *buf = calloc(16 * 16 * (size_t)s.spp * bytes, 1);
        int planes = s.separate ? s.spp : 1;
        for (int pl = 0; pl < planes; pl++)
            for (unsigned ty = 0; ty < s.h; ty += 16)
                for (unsigned tx = 0; tx < s.w; tx += 16) {
                    for (unsigned y = 0; y < 16; y++)
                        for (unsigned x = 0; x < 16; x++)
                            for (int c = 0; c < (s.separate ? 1 : s.spp); c++) {
                                int ch = s.separate ? pl : c;
                                size_t k = ((size_t)y * 16 + x) * (s.separate ? 1 : s.spp) + c;
                                unsigned v = pattern(ch, tx + x, ty + y, s.bits);
                                if (s.bits == 16) {
                                    uint16_t u = (uint16_t)v;
                                    memcpy(buf + 2 * k, &u, 2);
                                } else
                                    buf[k] = (unsigned char)v;
                            }
                    TIFFWriteTile(t, buf, tx, ty, 0, (uint16_t)pl);
                }
        free(buf);
    } else {
        TIFFSetField(t, TIFFTAG_ROWSPERSTRIP, 3);
        unsigned char *line = calloc((size_t)s.w * (size_t)s.spp * bytes, 1);
        int planes = s.separate ? s.spp : 1;
        for (int pl = 0; pl < planes; pl++)
            for (unsigned y = 0; y < s.h; y++) {
                for (unsigned x = 0; x < s.w; x++)
                    for (int c = 0; c < (s.separate ? 1 : s.spp); c++) {
                        int ch = s.separate ? pl : c;
                        size_t k = (size_t)x * (s.separate ? 1 : s.spp) + c;
                        unsigned v = pattern(ch, x, y, s.bits);
                        if (s.bits == 16) {
                            uint16_t u = (uint16_t)v;
                            memcpy(line + 2 * k, &u, 2);
                        } else
                            line[k] = (unsigned char)v;
                    }
                ck_assert_int_eq(TIFFWriteScanline(t, line, y, (uint16_t)pl), 1);
            }
        free(line);
    }
    TIFFClose(t);
}

static void cleanup(void)
{
    if (dir[0]) {
        rmdir(dir);
        dir[0] = '\0';
    }
}

static void check_pixels(const sl_film_scan *s, spec sp)
{
    ck_assert_uint_eq(s->width, sp.w);
    ck_assert_uint_eq(s->height, sp.h);
    ck_assert_int_eq(s->channels, sp.spp == 3 ? 3 : 1);
    for (int c = 0; c < (sp.spp == 3 ? 3 : 1); c++) {
        const uint16_t *pl = sl_film_plane(s, sp.spp == 3 ? c : SL_FILM_GREY);
        ck_assert_ptr_nonnull(pl);
        for (unsigned y = 0; y < sp.h; y++)
            for (unsigned x = 0; x < sp.w; x++)
                ck_assert_uint_eq(pl[y * sp.w + x], pattern(c, x, y, sp.bits));
    }
}

START_TEST(reads_every_layout)
{
    const spec cases[] = {
        {37, 21, 3, 16, false, false, true, 150}, {37, 21, 3, 16, true, false, true, 150},
        {37, 21, 3, 16, false, true, true, 150},  {37, 21, 3, 16, true, true, true, 150},
        {37, 21, 1, 16, false, false, true, 72},  {37, 21, 1, 16, false, true, true, 72},
    };
    for (size_t i = 0; i < sizeof cases / sizeof *cases; i++) {
        char name[32];
        snprintf(name, sizeof name, "layout%zu.tif", i);
        const char *p = tmp_path(name);
        write_tiff(p, cases[i]);
        sl_film_scan *s = NULL;
        sl_error e = {0};
        ck_assert_msg(sl_film_scan_read(p, 0, &s, &e) == SL_OK, "%zu: %s", i, e.msg);
        check_pixels(s, cases[i]);
        ck_assert_double_eq_tol(s->pixel_cm, 2.54 / cases[i].dpi, 1e-9);
        ck_assert(s->dpi_from_tags);
        ck_assert_uint_eq(s->notes.count, 0);
        sl_film_scan_free(s);
        unlink(p);
    }
    cleanup();
}
END_TEST

START_TEST(resolution_and_bits)
{
    const char *p = tmp_path("notags.tif");
    write_tiff(p, (spec){20, 10, 3, 16, false, false, false, 0});
    sl_film_scan *s = NULL;
    sl_error e = {0};
    ck_assert_int_eq(sl_film_scan_read(p, 0, &s, &e), SL_EINPUT);
    ck_assert_ptr_nonnull(strstr(e.msg, "notags.tif"));
    ck_assert_ptr_nonnull(strstr(e.msg, "no pixel size"));
    ck_assert_int_eq(sl_film_scan_read(p, 127, &s, &e), SL_OK);
    ck_assert_double_eq_tol(s->pixel_cm, 0.02, 1e-12);
    ck_assert(!s->dpi_from_tags);
    sl_film_scan_free(s);
    unlink(p);

    /* --dpi against different tags: used, with a note */
    p = tmp_path("tags.tif");
    write_tiff(p, (spec){20, 10, 3, 16, false, false, true, 300});
    ck_assert_int_eq(sl_film_scan_read(p, 150, &s, &e), SL_OK);
    ck_assert_double_eq_tol(s->pixel_cm, 2.54 / 150, 1e-12);
    ck_assert_uint_eq(s->notes.count, 1);
    sl_film_scan_free(s);
    unlink(p);

    /* 8 bits: read, with a warning */
    p = tmp_path("eight.tif");
    spec e8 = {20, 10, 3, 8, false, false, true, 100};
    write_tiff(p, e8);
    ck_assert_int_eq(sl_film_scan_read(p, 0, &s, &e), SL_OK);
    check_pixels(s, e8);
    ck_assert_uint_eq(s->notes.count, 1);
    ck_assert_ptr_nonnull(strstr(s->notes.items[0], "8-bit"));
    ck_assert_double_eq(s->max_value, 255);
    sl_film_scan_free(s);
    unlink(p);
    cleanup();
}
END_TEST

START_TEST(not_a_tiff)
{
    const char *p = tmp_path("text.tif");
    FILE *f = fopen(p, "w");
    fputs("not an image\n", f);
    fclose(f);
    sl_film_scan *s = NULL;
    sl_error e = {0};
    ck_assert_int_eq(sl_film_scan_read(p, 0, &s, &e), SL_EINPUT);
    ck_assert_ptr_null(s);
    ck_assert_ptr_nonnull(strstr(e.msg, "text.tif"));
    ck_assert_ptr_nonnull(strstr(e.msg, "not a readable TIFF"));
    unlink(p);
    ck_assert_int_eq(sl_film_scan_read(tmp_path("absent.tif"), 0, &s, &e), SL_EINPUT);
    cleanup();
}
END_TEST

START_TEST(region_statistics)
{
    const char *p = tmp_path("region.tif");
    spec sp = {40, 30, 1, 16, false, false, true, 100};
    write_tiff(p, sp);
    sl_film_scan *s = NULL;
    sl_error e = {0};
    ck_assert_int_eq(sl_film_scan_read(p, 0, &s, &e), SL_OK);
    sl_film_stats st;
    /* a clean region: the plain mean of the pattern */
    ck_assert_int_eq(sl_film_region_stats(s, SL_FILM_GREY, 2, 3, 12, 8, &st, &e), SL_OK);
    double sum = 0;
    for (unsigned y = 3; y < 8; y++)
        for (unsigned x = 2; x < 12; x++)
            sum += pattern(0, x, y, 16);
    ck_assert_double_eq_tol(st.mean, sum / 50, 1e-9);
    ck_assert_uint_eq(st.n, 50);
    /* outside the image, or empty */
    ck_assert_int_eq(sl_film_region_stats(s, SL_FILM_GREY, 30, 0, 41, 5, &st, &e), SL_EINPUT);
    ck_assert_ptr_nonnull(strstr(e.msg, "outside"));
    ck_assert_int_eq(sl_film_region_stats(s, SL_FILM_GREY, 5, 5, 5, 9, &st, &e), SL_EINPUT);
    /* a grey scan has no red channel of its own but answers it with its one plane */
    ck_assert_ptr_nonnull(sl_film_plane(s, SL_FILM_RED));
    /* saturated pixels: 2 of 50 (4 %) refused, 0 of 50 accepted */
    uint16_t *pl = s->pix;
    pl[4 * 40 + 5] = 65535;
    pl[5 * 40 + 6] = 0;
    ck_assert_int_eq(sl_film_region_stats(s, SL_FILM_GREY, 2, 3, 12, 8, &st, &e), SL_EINPUT);
    ck_assert_ptr_nonnull(strstr(e.msg, "saturated or empty"));
    sl_film_scan_free(s);
    unlink(p);
    cleanup();
}
END_TEST

START_TEST(robust_mean_rejects_dust)
{
    /* 400 values of 1000 +- a known spread, 6 dust pixels at half and twice the level */
    double v[406];
    double clean = 0;
    for (int i = 0; i < 400; i++) {
        v[i] = 1000 + ((i * 37) % 21 - 10);
        clean += v[i];
    }
    clean /= 400;
    for (int i = 400; i < 406; i++)
        v[i] = i % 2 ? 500 : 2000;
    sl_film_stats st;
    sl_film_robust(v, 406, &st);
    ck_assert_uint_eq(st.n_used, 400);
    ck_assert_double_eq_tol(st.mean, clean, 1e-9);
    ck_assert(st.sd > 5 && st.sd < 7);
    sl_film_robust(v, 0, &st);
    ck_assert(isnan(st.mean));
}
END_TEST

/* Three channels of the rational response X(D) = a + b / (D - c), X(0) = 1 (the
 * invented responses of examples/generator/film_synth.py), as curves D = c + b / (X - a). */
static void triple_channels(sl_film_channel ch[3], double pv0[3])
{
    const double a[3] = {0.25, 0.30, 0.50}, c[3] = {-60, -120, -400};
    const double p0[3] = {42000, 38000, 30000};
    memset(ch, 0, 3 * sizeof *ch);
    for (int k = 0; k < 3; k++) {
        ch[k].channel = k;
        ch[k].pv0 = pv0[k] = p0[k];
        ch[k].pv0_sem = 1;
        ch[k].chosen = SL_FILM_FORM_RATIONAL;
        double *t = ch[k].forms[SL_FILM_FORM_RATIONAL].theta;
        t[0] = a[k];
        t[1] = (1 - a[k]) * (-c[k]);
        t[2] = c[k];
        ch[k].forms[SL_FILM_FORM_RATIONAL].ok = true;
        ch[k].max_dose_cgy = 150;
        ch[k].max_netod = -log10(a[k] + t[1] / (150 - c[k]));
    }
}

START_TEST(triple_cell_exact)
{
    sl_film_channel ch[3];
    double pv0[3];
    triple_channels(ch, pv0);
    sl_film_triple tr = {{&ch[0], &ch[1], &ch[2]}, {0, 0, 0}, 65535, SL_FILM_TAU_LO,
                         SL_FILM_TAU_HI};
    for (int k = 0; k < 3; k++)
        tr.od0[k] = log10(65535 / pv0[k]);
    const double cases[][2] = {{0, 0.97}, {0.5, 1.04}, {5, 1.0}, {40, 0.93}, {120, 1.1}};
    for (size_t i = 0; i < sizeof cases / sizeof cases[0]; i++) {
        double D = cases[i][0], tau = cases[i][1], pv[3], sem[3] = {5, 5, 5};
        for (int k = 0; k < 3; k++) {
            const double *t = ch[k].forms[SL_FILM_FORM_RATIONAL].theta;
            double X = t[0] + t[1] / (D - t[2]);
            pv[k] = 65535 * pow(pv0[k] * X / 65535, tau);
        }
        sl_film_triple_result r;
        sl_film_triple_cell(&tr, pv, sem, &r);
        ck_assert_int_eq(r.status, SL_TRIPLE_OK);
        ck_assert_msg(fabs(r.tau - tau) < 1e-7, "case %zu: tau %.9g", i, r.tau);
        ck_assert_msg(fabs(r.dose_cgy - D) < 1e-5 * fmax(1, D), "case %zu: dose %.9g", i,
                      r.dose_cgy);
        ck_assert(r.chisq < 1e-9);
        ck_assert(r.sigma_cgy > 0 && isfinite(r.sigma_cgy));
    }
    /* beyond the range searched: on the bound, not taken */
    double pv[3], sem[3] = {5, 5, 5};
    for (int k = 0; k < 3; k++)
        pv[k] = 65535 * pow(pv0[k] / 65535, 1.25);
    sl_film_triple_result r;
    sl_film_triple_cell(&tr, pv, sem, &r);
    ck_assert_int_eq(r.status, SL_TRIPLE_BOUND);
    ck_assert(isnan(r.dose_cgy));
    /* a channel at the scale's top: no reading */
    pv[0] = 65535;
    sl_film_triple_cell(&tr, pv, sem, &r);
    ck_assert_int_eq(r.status, SL_TRIPLE_ABOVE);
}
END_TEST

START_TEST(form_gradients)
{
    const double th[2][3] = {{120.0, 900.0, 2.6}, {0.25, 45.0, -60.0}};
    for (int f = 0; f < SL_FILM_NFORMS; f++)
        for (double x = -0.01; x < 0.4; x += 0.037) {
            double g[3];
            double v = sl_film_form_eval((sl_film_form)f, th[f], x, g);
            ck_assert(isfinite(v));
            for (int k = 0; k < 3; k++) {
                double t1[3], t2[3];
                memcpy(t1, th[f], sizeof t1);
                memcpy(t2, th[f], sizeof t2);
                double h = 1e-6 * fmax(1.0, fabs(th[f][k]));
                t1[k] += h;
                t2[k] -= h;
                double fd = (sl_film_form_eval((sl_film_form)f, t1, x, NULL) -
                             sl_film_form_eval((sl_film_form)f, t2, x, NULL)) /
                            (2 * h);
                ck_assert_msg(fabs(fd - g[k]) <= 1e-5 * fmax(1.0, fabs(fd)),
                              "form %d x %g param %d: %g vs %g", f, x, k, g[k], fd);
            }
        }
    /* rational at netOD 0 is the dose of X = 1: c + b / (1 - a) = 0 for these values */
    ck_assert_double_eq_tol(sl_film_form_eval(SL_FILM_FORM_RATIONAL, th[1], 0, NULL), 0, 1e-12);
    /* beyond the asymptote the rational form is undefined */
    ck_assert(isnan(sl_film_form_eval(SL_FILM_FORM_RATIONAL, th[1], 1.0, NULL)));
}
END_TEST

static Suite *film_suite(void)
{
    Suite *s = suite_create("film");
    TCase *tc = tcase_create("film");
    tcase_add_test(tc, reads_every_layout);
    tcase_add_test(tc, resolution_and_bits);
    tcase_add_test(tc, not_a_tiff);
    tcase_add_test(tc, region_statistics);
    tcase_add_test(tc, robust_mean_rejects_dust);
    tcase_add_test(tc, form_gradients);
    tcase_add_test(tc, triple_cell_exact);
    suite_add_tcase(s, tc);
    return s;
}

SL_CHECK_MAIN(film_suite)
