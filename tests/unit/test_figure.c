/*
 * Unit tests of the figure machinery (src/report/figure.h): the patient
 * directions on the edges of a beam's-eye view, numbers written without
 * exponents, and a figure rendered to SVG and into an HTML tree with ids
 * of its own.
 *
 * The directions are facts of the trade (IEC 61217 and the DICOM patient
 * axes; common practice, checked by hand): seen from the source of an
 * anterior beam (gantry 0) on a head-first supine patient one faces the
 * patient, so the patient's left is on the viewer's right and the head up;
 * a beam from the patient's left (gantry 90, IEC 61217: the source turns
 * toward IEC +X, the patient's left when head-first supine) shows the
 * posterior on the right; from the right (gantry 270) the anterior; from
 * behind (gantry 180) the patient's right. A prone patient seen from the
 * ceiling shows the back: the patient's right on the viewer's right. Feet
 * first toward the gantry puts the feet at the top.
 */
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include <libxml/parser.h>

#include "check_main.h"
#include "src/report/figure.h"

static void dirs(sl_position pos, double gantry, double coll, double couch, char right[4],
                 char up[4])
{
    sl_frame f;
    char left[4], down[4];
    sl_frame_init(&f, pos, gantry, coll, couch, 0, (sl_vec3){0, 0, 0}, 100);
    fig_bev_directions(&f, right, left, up, down);
    /* the opposite edges name the opposite directions, letter by letter */
    static const char *const pairs[] = {"LR", "RL", "AP", "PA", "HF", "FH"};
    for (size_t i = 0; right[i]; i++) {
        const char *p = NULL;
        for (size_t k = 0; k < 6; k++)
            if (pairs[k][0] == right[i])
                p = pairs[k];
        ck_assert_ptr_nonnull(p);
        ck_assert_int_eq(left[i], p[1]);
    }
    for (size_t i = 0; up[i]; i++) {
        const char *p = NULL;
        for (size_t k = 0; k < 6; k++)
            if (pairs[k][0] == up[i])
                p = pairs[k];
        ck_assert_ptr_nonnull(p);
        ck_assert_int_eq(down[i], p[1]);
    }
}

START_TEST(directions_head_first_supine)
{
    char r[4], u[4];
    dirs(SL_POS_HFS, 0, 0, 0, r, u);
    ck_assert_str_eq(r, "L");
    ck_assert_str_eq(u, "H");
    dirs(SL_POS_HFS, 90, 0, 0, r, u);
    ck_assert_str_eq(r, "P");
    ck_assert_str_eq(u, "H");
    dirs(SL_POS_HFS, 270, 0, 0, r, u);
    ck_assert_str_eq(r, "A");
    ck_assert_str_eq(u, "H");
    dirs(SL_POS_HFS, 180, 0, 0, r, u);
    ck_assert_str_eq(r, "R");
    ck_assert_str_eq(u, "H");
    /* oblique: gantry 45 between the anterior and the left beam: the right
     * edge leans equally to the left and the back */
    dirs(SL_POS_HFS, 45, 0, 0, r, u);
    ck_assert_int_eq(strlen(r), 2);
    ck_assert(strchr(r, 'L') && strchr(r, 'P'));
    ck_assert_str_eq(u, "H");
    /* a small obliquity (10 degrees, a component of 0.17) is not named */
    dirs(SL_POS_HFS, 10, 0, 0, r, u);
    ck_assert_str_eq(r, "L");
}
END_TEST

START_TEST(directions_other_positions)
{
    char r[4], u[4];
    dirs(SL_POS_HFP, 0, 0, 0, r, u);
    ck_assert_str_eq(r, "R");
    ck_assert_str_eq(u, "H");
    dirs(SL_POS_FFS, 0, 0, 0, r, u);
    ck_assert_str_eq(r, "R");
    ck_assert_str_eq(u, "F");
}
END_TEST

/* Turning the collimator a quarter turn turns the picture with it: the
 * directions move one edge round, whichever way the rotation goes, and the
 * two axes stay perpendicular (one names L or R, the other H or F). */
START_TEST(directions_follow_the_collimator)
{
    char r[4], u[4];
    dirs(SL_POS_HFS, 0, 90, 0, r, u);
    ck_assert(strcmp(r, "H") == 0 || strcmp(r, "F") == 0);
    ck_assert(strcmp(u, "L") == 0 || strcmp(u, "R") == 0);
    char r2[4], u2[4];
    dirs(SL_POS_HFS, 0, 270, 0, r2, u2);
    ck_assert_int_ne(r[0], r2[0]);
    ck_assert_int_ne(u[0], u2[0]);
    /* a couch turned a quarter turn puts the head across the picture */
    dirs(SL_POS_HFS, 0, 0, 90, r, u);
    ck_assert(strcmp(r, "H") == 0 || strcmp(r, "F") == 0);
    ck_assert(strcmp(u, "L") == 0 || strcmp(u, "R") == 0);
}
END_TEST

START_TEST(numbers_have_no_exponent)
{
    const struct {
        double v;
        const char *s;
    } c[] = {
        {0.01, "0.01"}, {0.1, "0.1"},   {1, "1"},         {10, "10"},
        {1000, "1000"}, {0.5, "0.5"},   {0.056, "0.056"}, {3.14159, "3.1"},
        {1e-5, "0.00001"}, {2160, "2160"}, {1e7, "10000000"}, {0, "0"},
        {-0.25, "-0.25"}, {-1e-12, "-0.000000001"},
    };
    for (size_t i = 0; i < sizeof c / sizeof *c; i++) {
        char buf[64];
        fig_format_number(c[i].v, buf, sizeof buf);
        if (i + 1 == sizeof c / sizeof *c) /* below the last decimal: no "e" either way */
            ck_assert_ptr_null(strchr(buf, 'e'));
        else
            ck_assert_str_eq(buf, c[i].s);
    }
}
END_TEST

static void draw_text(cairo_t *cr, double w, double h, const void *ctx)
{
    (void)ctx;
    cairo_set_source_rgb(cr, 0, 0, 0);
    cairo_rectangle(cr, 1, 1, w - 2, h - 2);
    cairo_stroke(cr);
    fig_text(cr, w / 2, h / 2, 0.5, 0.5, "Lens_L 0.01 cGy \u25B2", (fig_font){9, false, false},
             0);
    fig_count(cr, "things", "%d", 3);
}

START_TEST(svg_string_parses)
{
    char *svg = NULL;
    size_t len = 0;
    sl_error err;
    ck_assert_int_eq(fig_svg_string(200, 100, draw_text, NULL, &svg, &len, &err), SL_OK);
    ck_assert_uint_gt(len, 100);
    xmlDocPtr d = xmlReadMemory(svg, (int)len, "t.svg", NULL, XML_PARSE_NONET);
    ck_assert_ptr_nonnull(d);
    ck_assert_str_eq((const char *)xmlDocGetRootElement(d)->name, "svg");
    xmlFreeDoc(d);
    free(svg);
}
END_TEST

/* Two figures in one page: cairo names their glyphs alike; after the
 * import every id is distinct and every reference points into its own
 * figure. */
START_TEST(two_figures_get_their_own_ids)
{
    hdoc h;
    ck_assert(hdoc_new(&h, "t", ""));
    xmlNodePtr a = fig_svg_into(&h, h.body, 200, 100, draw_text, NULL);
    xmlNodePtr b = fig_svg_into(&h, h.body, 200, 100, draw_text, NULL);
    ck_assert_ptr_nonnull(a);
    ck_assert_ptr_nonnull(b);
    xmlChar *ca = xmlGetProp(a, BAD_CAST "data-counts");
    ck_assert_str_eq((const char *)ca, "things=3");
    xmlFree(ca);
    xmlChar *ma = NULL;
    int na = 0;
    xmlDocDumpMemory(h.doc, &ma, &na); /* the whole page as one text */
    const char *s = (const char *)ma;
    ck_assert_ptr_nonnull(strstr(s, "id=\"fig1-"));
    ck_assert_ptr_nonnull(strstr(s, "id=\"fig2-"));
    ck_assert_ptr_nonnull(strstr(s, "href=\"#fig1-"));
    ck_assert_ptr_nonnull(strstr(s, "href=\"#fig2-"));
    ck_assert_ptr_null(strstr(s, "href=\"#glyph"));
    xmlFree(ma);
    hdoc_free(&h);
}
END_TEST

/* Last: the font libraries' caches released, as the tool does at its end,
 * so that the leak checkers of the sanitizer build see only real leaks. */
START_TEST(caches_released)
{
    sl_report_release_caches();
    ck_assert(true);
}
END_TEST

static Suite *figure_suite(void)
{
    Suite *s = suite_create("figure");
    TCase *tc = tcase_create("figure");
    tcase_add_test(tc, directions_head_first_supine);
    tcase_add_test(tc, directions_other_positions);
    tcase_add_test(tc, directions_follow_the_collimator);
    tcase_add_test(tc, numbers_have_no_exponent);
    tcase_add_test(tc, svg_string_parses);
    tcase_add_test(tc, two_figures_get_their_own_ids);
    tcase_add_test(tc, caches_released);
    suite_add_tcase(s, tc);
    return s;
}

SL_CHECK_MAIN(figure_suite)
