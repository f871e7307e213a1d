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
#include <pthread.h>
#include <stdatomic.h>
#include <stdbool.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include <libxml/parser.h>
#include <pango/pangocairo.h>

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
    /* cut with an ellipsis: SVG text of what Pango shows, the ellipsis
     * included */
    fig_text(cr, 2, 2, 0, 0, "a label far too long for thirty points", (fig_font){9, false, false},
             -30);
    /* a pattern source: drawn as cairo's glyphs, whose ids and references
     * must be prefixed per figure */
    cairo_pattern_t *g = cairo_pattern_create_linear(0, 0, w, 0);
    cairo_pattern_add_color_stop_rgb(g, 0, 0, 0, 0);
    cairo_pattern_add_color_stop_rgb(g, 1, 0, 0, 1);
    cairo_set_source(cr, g);
    fig_text(cr, 2, h - 12, 0, 0, "shaded", (fig_font){9, false, false}, 0);
    cairo_pattern_destroy(g);
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

/* Two figures in one page: cairo names its definitions alike; after the
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
    /* the shaded label's gradient: a definition of each figure's own */
    ck_assert_ptr_nonnull(strstr(s, "id=\"fig1-linear"));
    ck_assert_ptr_nonnull(strstr(s, "url(#fig1-linear"));
    ck_assert_ptr_nonnull(strstr(s, "url(#fig2-linear"));
    ck_assert_ptr_null(strstr(s, "url(#linear"));
    ck_assert_ptr_null(strstr(s, "href=\"#glyph"));
    /* the text that fits is SVG text, its symbol a character reference */
    ck_assert_ptr_nonnull(strstr(s, ">Lens_L 0.01 cGy &#9650;</text>"));
    /* the text cut with an ellipsis too: its start, then the ellipsis */
    const char *cut = strstr(s, ">a la");
    ck_assert_ptr_nonnull(cut);
    const char *cut_end = strstr(cut, "</text>");
    ck_assert_ptr_nonnull(cut_end);
    const char *ell = strstr(cut, "&#8230;");
    ck_assert(ell && ell < cut_end);
    ck_assert_ptr_null(strstr(s, "thirty points</text>"));
    ck_assert_ptr_null(strstr(s, "fill-opacity:0.0123"));
    xmlFree(ma);
    hdoc_free(&h);
}
END_TEST

/* A plain rectangle: cairo's SVG wraps every drawing in a group named
 * after the page's surface, whose number comes from a counter of the whole
 * process. */
static void draw_box(cairo_t *cr, double w, double h, const void *ctx)
{
    (void)ctx;
    cairo_set_source_rgb(cr, 0.2, 0.4, 0.6);
    cairo_rectangle(cr, 2, 2, w / 2, h / 2);
    cairo_fill(cr);
}

static char *page_with_box(void)
{
    hdoc h;
    ck_assert(hdoc_new(&h, "t", ""));
    ck_assert_ptr_nonnull(fig_svg_into(&h, h.body, 120, 80, draw_box, NULL));
    xmlChar *m = NULL;
    int n = 0;
    xmlDocDumpMemory(h.doc, &m, &n);
    char *copy = strdup((const char *)m);
    xmlFree(m);
    hdoc_free(&h);
    return copy;
}

/* The same figure gives the same bytes, whatever cairo drew in between:
 * the figure's ids are numbered by their place in it, not by cairo's
 * counters (two runs of a scan gave two reports that differed only there). */
START_TEST(same_figure_same_bytes)
{
    char *one = page_with_box();
    for (int i = 0; i < 7; i++) /* move cairo's surface counter on */
        cairo_surface_destroy(cairo_image_surface_create(CAIRO_FORMAT_ARGB32, 4, 4));
    char *two = page_with_box();
    ck_assert_ptr_nonnull(strstr(one, "id=\"fig1-surface"));
    ck_assert_str_eq(one, two);
    free(one);
    free(two);
}
END_TEST

/* A path through coordinates that test the rounding of path data to
 * hundredths of a point: exact binary ties (10.125, 20.375, 0.625), a
 * carry through nines (99.999), a tiny negative (-0.004), whole numbers. */
static const double coords[][2] = {{10.125, 20.375}, {0.625, 99.999}, {-0.004, 5},
                                   {33.3333, 7.5},   {12, 0.005},     {1e-7, 150.0449}};
static void draw_coords(cairo_t *cr, double w, double h, const void *ctx)
{
    (void)w, (void)h, (void)ctx;
    for (size_t i = 0; i < sizeof coords / sizeof *coords; i++)
        (i ? cairo_line_to : cairo_move_to)(cr, coords[i][0], coords[i][1]);
    cairo_set_line_width(cr, 1);
    cairo_stroke(cr);
}

/* The first stroked path under n (depth first). */
static xmlNodePtr stroked_path(xmlNodePtr n)
{
    for (; n; n = n->next) {
        if (n->type != XML_ELEMENT_NODE)
            continue;
        if (xmlStrcmp(n->name, BAD_CAST "path") == 0) {
            xmlChar *st = xmlGetProp(n, BAD_CAST "style");
            bool stroked = st && strstr((const char *)st, "fill:none");
            xmlFree(st);
            if (stroked)
                return n;
        }
        xmlNodePtr c = stroked_path(n->children);
        if (c)
            return c;
    }
    return NULL;
}

/* The numbers of a path's data, in order. */
static size_t path_numbers(const char *d, double *v, size_t max, char tok[][40])
{
    size_t n = 0;
    for (const char *p = d; *p && n < max;) {
        if ((*p >= '0' && *p <= '9') || *p == '-' || *p == '.') {
            char *end;
            v[n] = strtod(p, &end);
            snprintf(tok[n], 40, "%.*s", (int)(end - p), p);
            n++;
            p = end;
        } else {
            p++;
        }
    }
    return n;
}

/* Path data in the HTML carry hundredths of a point: every number within
 * half a hundredth of what cairo wrote (fig_svg_string, unrounded), with at
 * most two decimals, no trailing zero, no "-0"; exact ties go to even as C's
 * printf("%.2f") rounds them (C17 7.21.6.1, with IEEE 754 round to nearest
 * even: common practice of glibc), checked against snprintf here. */
START_TEST(path_data_rounded_to_hundredths)
{
    char *raw = NULL;
    size_t len = 0;
    sl_error err;
    ck_assert_int_eq(fig_svg_string(200, 200, draw_coords, NULL, &raw, &len, &err), SL_OK);
    const char *rp = strstr(raw, "<path style=\"fill:none");
    ck_assert_ptr_nonnull(rp);
    const char *rd = strstr(rp, " d=\"");
    ck_assert_ptr_nonnull(rd);
    hdoc h;
    ck_assert(hdoc_new(&h, "t", ""));
    xmlNodePtr fig = fig_svg_into(&h, h.body, 200, 200, draw_coords, NULL);
    ck_assert_ptr_nonnull(fig);
    xmlNodePtr path = stroked_path(fig->children);
    ck_assert_ptr_nonnull(path);
    xmlChar *d = xmlGetProp(path, BAD_CAST "d");
    double a[32], b[32];
    char ta[32][40], tb[32][40];
    size_t na = path_numbers(rd + 4, a, 32, ta), nb = path_numbers((const char *)d, b, 32, tb);
    ck_assert_uint_eq(na, 12);
    ck_assert_uint_eq(nb, na);
    for (size_t i = 0; i < na; i++) {
        ck_assert_msg(fabs(b[i] - a[i]) <= 0.005 + 1e-9, "%s -> %s", ta[i], tb[i]);
        const char *dot = strchr(tb[i], '.');
        ck_assert(!dot || strlen(dot + 1) <= 2);
        ck_assert(!dot || tb[i][strlen(tb[i]) - 1] != '0');
        ck_assert_str_ne(tb[i], "-0");
        /* where the raw text is the binary value exactly, as printf rounds it */
        char want[48];
        snprintf(want, sizeof want, "%.2f", a[i]);
        char *e = want + strlen(want) - 1;
        while (*e == '0')
            *e-- = '\0';
        if (*e == '.')
            *e = '\0';
        if (strcmp(want, "-0") == 0)
            strcpy(want, "0");
        double back = strtod(ta[i], NULL);
        if (back == a[i] && (strcmp(ta[i], "10.125") == 0 || strcmp(ta[i], "20.375") == 0 ||
                             strcmp(ta[i], "0.625") == 0 || strcmp(ta[i], "99.999") == 0))
            ck_assert_str_eq(tb[i], want);
    }
    /* the cases named above, as written */
    char *all = (char *)d;
    ck_assert_ptr_nonnull(strstr(all, "10.12 20.38"));
    ck_assert_ptr_nonnull(strstr(all, "0.62 100"));
    xmlFree(d);
    free(raw);
    hdoc_free(&h);
}
END_TEST

/* A font map held by another thread, as Pango's own threads (fontconfig's
 * start-up, font matching) hold one until their task ends. */
typedef struct held_map {
    PangoFontMap *fm;
    atomic_bool dropped;
} held_map;

static void *drop_later(void *arg)
{
    held_map *h = arg;
    g_usleep(150 * 1000);
    atomic_store(&h->dropped, true);
    g_object_unref(h->fm);
    return NULL;
}

/* Distance from p to segment ab (plane geometry by hand). */
static double seg_distance(double px, double py, double ax, double ay, double bx, double by)
{
    double dx = bx - ax, dy = by - ay, l2 = dx * dx + dy * dy;
    double t = l2 > 0 ? ((px - ax) * dx + (py - ay) * dy) / l2 : 0;
    t = t < 0 ? 0 : t > 1 ? 1 : t;
    return hypot(px - ax - t * dx, py - ay - t * dy);
}

/* Distance from p to a closed outline of n vertices. */
static double ring_distance(double px, double py, double (*ring)[2], int n)
{
    double best = INFINITY;
    for (int j = 0; j < n; j++) {
        int jn = (j + 1) % n;
        best = fmin(best, seg_distance(px, py, ring[j][0], ring[j][1], ring[jn][0], ring[jn][1]));
    }
    return best;
}

/* fig_path_thin, the Ramer-Douglas-Peucker method (Ramer 1972; Douglas and
 * Peucker 1973): a closed circle of 720 points, radius 40 pt, keeps every
 * drawn point within the tolerance of the thinned outline and needs far
 * fewer (a chord of length c strays c^2 / (8 r) from its arc: chords of
 * sqrt(8 r tol) at most, 8.9 pt at 0.25 pt, so at least 29 vertices, and
 * the method, which splits at the farthest point, takes some more); 500
 * collinear points keep their two ends; a curve and the close stay; under a
 * scale of 10 the tolerance stays FIG_THIN_TOLERANCE_PT device points. */
static int least_ring_vertices(double r)
{
    return (int)ceil(2 * M_PI * r / sqrt(8 * r * FIG_THIN_TOLERANCE_PT));
}

START_TEST(paths_thinned_within_tolerance)
{
    /* a tenth of the widest stroke the figures draw (2.4 pt) at most */
    ck_assert(FIG_THIN_TOLERANCE_PT > 0 && FIG_THIN_TOLERANCE_PT <= 0.25);
    cairo_surface_t *s = cairo_image_surface_create(CAIRO_FORMAT_ARGB32, 10, 10);
    cairo_t *cr = cairo_create(s);
    for (int scaled = 0; scaled < 2; scaled++) {
        double k = scaled ? 10 : 1; /* user units per device point */
        cairo_identity_matrix(cr);
        cairo_scale(cr, 1 / k, 1 / k);
        const int n = 720;
        double px[720], py[720];
        cairo_new_path(cr);
        for (int i = 0; i < n; i++) {
            px[i] = k * (50 + 40 * cos(2 * M_PI * i / n));
            py[i] = k * (50 + 40 * sin(2 * M_PI * i / n));
            if (i == 0)
                cairo_move_to(cr, px[i], py[i]);
            else
                cairo_line_to(cr, px[i], py[i]);
        }
        cairo_close_path(cr);
        cairo_move_to(cr, 0, 0);
        for (int i = 1; i < 500; i++)
            cairo_line_to(cr, k * i * 0.1, k * i * 0.05);
        cairo_curve_to(cr, k * 60, k * 30, k * 70, k * 20, k * 80, k * 10);
        fig_path_thin(cr);
        cairo_path_t *p = cairo_copy_path(cr);
        ck_assert_int_eq(p->status, CAIRO_STATUS_SUCCESS);
        double ring[720][2];
        int nring = 0, nline = 0, ncurve = 0, ncloses = 0, sub = 0;
        double line_end[2] = {0, 0};
        for (int i = 0; i < p->num_data; i += p->data[i].header.length) {
            const cairo_path_data_t *d = &p->data[i];
            if (d->header.type == CAIRO_PATH_MOVE_TO)
                sub++;
            if (d->header.type == CAIRO_PATH_CLOSE_PATH)
                ncloses++;
            if (d->header.type == CAIRO_PATH_CURVE_TO) {
                ncurve++;
                ck_assert_double_eq_tol(d[3].point.x, k * 80, k / 128);
            }
            if (d->header.type == CAIRO_PATH_MOVE_TO || d->header.type == CAIRO_PATH_LINE_TO) {
                if (sub == 1 && ncloses == 0) {
                    ring[nring][0] = d[1].point.x;
                    ring[nring][1] = d[1].point.y;
                    nring++;
                } else if (ncloses == 1 && !(d->header.type == CAIRO_PATH_MOVE_TO &&
                                             d[1].point.x == px[0])) {
                    nline++;
                    line_end[0] = d[1].point.x;
                    line_end[1] = d[1].point.y;
                }
            }
        }
        ck_assert_int_eq(ncloses, 1);
        ck_assert_int_eq(ncurve, 1);
        ck_assert_int_ge(nring, least_ring_vertices(40));
        ck_assert_int_lt(nring, 3 * least_ring_vertices(40));
        /* the straight run: its start and its end, nothing between */
        ck_assert_int_eq(nline, 2);
        /* (cairo keeps paths in fixed point, 1/256 of a device unit) */
        ck_assert_double_eq_tol(line_end[0], k * 49.9, k / 128);
        ck_assert_double_eq_tol(line_end[1], k * 24.95, k / 128);
        /* every drawn point of the circle within the tolerance of the
         * thinned outline (closed back to its start) */
        for (int i = 0; i < n; i++) {
            double best = ring_distance(px[i], py[i], ring, nring) / k;
            ck_assert_msg(best <= FIG_THIN_TOLERANCE_PT + 1.0 / 128, "point %d strays %g pt", i,
                          best);
        }
        cairo_path_destroy(p);
    }
    cairo_destroy(cr);
    cairo_surface_destroy(s);
}
END_TEST

/* The ring points as forty bisections of [0, reach] find them along each
 * ray from the middle of the outline's bounds: the reference. */
static void rings_by_bisection(const sl_outline *o, double r, sl_vec2 *p, size_t n)
{
    sl_vec2 lo, hi;
    sl_outline_bounds(o, &lo, &hi);
    sl_vec2 c = {(lo.x + hi.x) / 2, (lo.y + hi.y) / 2};
    double reach = hypot(hi.x - lo.x, hi.y - lo.y) + r + 1;
    for (size_t i = 0; i < n; i++) {
        double a = 2 * M_PI * (double)i / (double)n, dx = cos(a), dy = sin(a);
        double t0 = 0, t1 = reach;
        for (int it = 0; it < 40; it++) {
            double tm = 0.5 * (t0 + t1);
            if (sl_outline_distance(o, (sl_vec2){c.x + tm * dx, c.y + tm * dy}) < r)
                t0 = tm;
            else
                t1 = tm;
        }
        p[i] = (sl_vec2){c.x + t0 * dx, c.y + t0 * dy};
    }
}

/* The beam's-eye view's distance rings against forty bisections: on a
 * convex cutout (a 9-gon) every point on its ring and within 1e-8 cm of the
 * bisections' (false position there); on an L, whose middle lies outside
 * it, and on a square with a slot, whose rays cross the 1 cm ring up to
 * three times, the bisections' points themselves (an independent review
 * found the L's rings shrunk to their middle by the faster search). */
START_TEST(distance_rings_lie_at_their_distance)
{
    sl_vec2 gon[9], ell[6] = {{0, 0}, {10, 0}, {10, 3}, {3, 3}, {3, 10}, {0, 10}};
    sl_vec2 slot[8] = {{0, 0}, {20, 0}, {20, 13}, {2, 13}, {2, 16}, {20, 16}, {20, 20}, {0, 20}};
    for (int i = 0; i < 9; i++)
        gon[i] = (sl_vec2){1 + 3 * cos(2 * M_PI * i / 9), -2 + 2.5 * sin(2 * M_PI * i / 9)};
    const struct {
        sl_vec2 *p;
        size_t n;
    } shapes[] = {{gon, 9}, {ell, 6}, {slot, 8}};
    sl_error e = {0};
    for (size_t k = 0; k < sizeof shapes / sizeof *shapes; k++) {
        sl_outline_loop l = {shapes[k].p, shapes[k].n};
        sl_outline *o;
        ck_assert_int_eq(sl_outline_create(&l, 1, "cutout", &o, &e), SL_OK);
        ck_assert(sl_outline_convex(o) == (k == 0));
        for (double r = 1; r <= 2; r += 1) {
            enum { NR = 144 };
            sl_vec2 p[NR], q[NR];
            fig_bev_ring_points(o, r, p, NR);
            rings_by_bisection(o, r, q, NR);
            for (int i = 0; i < NR; i++) {
                double gap = hypot(p[i].x - q[i].x, p[i].y - q[i].y);
                if (k == 0) {
                    ck_assert(fabs(sl_outline_distance(o, p[i]) - r) < 1e-8);
                    ck_assert_msg(gap < 1e-8, "ring %g, point %d: %g cm apart", r, i, gap);
                } else {
                    ck_assert_msg(gap == 0, "shape %zu, ring %g, point %d: %g cm apart", k, r, i,
                                  gap);
                }
            }
        }
        sl_outline_free(o);
    }
}
END_TEST

static int cmp_desc_ref(const void *a, const void *b)
{
    const fig_dv *x = a, *y = b;
    return x->d > y->d ? -1 : x->d < y->d;
}

/* fig_dv_sort_desc against glibc's qsort with the same comparison (a merge
 * sort, stable, the reference): random doses over many decades with many
 * ties, both zeros, negatives, infinities and subnormals give the same
 * sequence, ties in their first order (told apart by their volumes); with a
 * NaN among them it still returns every element, sorted around it as qsort
 * sorts. */
/* The tolerance holds on the page under a rotated, unevenly scaled
 * transformation too: a circle of 720 points, radius 40 device points,
 * drawn through rotate(30 degrees) and scale(8, 1), every point within the
 * tolerance of the thinned outline, measured on the page. */
START_TEST(paths_thinned_within_tolerance_on_the_page)
{
    cairo_surface_t *s = cairo_image_surface_create(CAIRO_FORMAT_ARGB32, 10, 10);
    cairo_t *cr = cairo_create(s);
    cairo_rotate(cr, M_PI / 6);
    cairo_scale(cr, 8, 1);
    enum { N = 720 };
    double px[N], py[N];
    cairo_new_path(cr);
    for (int i = 0; i < N; i++) {
        px[i] = 50 + 40 * cos(2 * M_PI * i / N);
        py[i] = 50 + 40 * sin(2 * M_PI * i / N);
        double ux = px[i], uy = py[i];
        cairo_device_to_user(cr, &ux, &uy);
        if (i == 0)
            cairo_move_to(cr, ux, uy);
        else
            cairo_line_to(cr, ux, uy);
    }
    cairo_close_path(cr);
    fig_path_thin(cr);
    cairo_path_t *p = cairo_copy_path(cr);
    ck_assert_int_eq(p->status, CAIRO_STATUS_SUCCESS);
    static double ring[N][2];
    int nring = 0;
    for (int i = 0; i < p->num_data; i += p->data[i].header.length) {
        const cairo_path_data_t *d = &p->data[i];
        if ((d->header.type == CAIRO_PATH_MOVE_TO || d->header.type == CAIRO_PATH_LINE_TO) &&
            nring < N) {
            double x = d[1].point.x, y = d[1].point.y;
            cairo_user_to_device(cr, &x, &y);
            ring[nring][0] = x;
            ring[nring][1] = y;
            nring++;
        }
    }
    /* a trailing move to the start after the close is the start again */
    ck_assert_int_ge(nring, least_ring_vertices(40));
    ck_assert_int_lt(nring, 200);
    for (int i = 0; i < N; i++) {
        double best = ring_distance(px[i], py[i], ring, nring);
        ck_assert_msg(best <= FIG_THIN_TOLERANCE_PT + 1.0 / 128, "point %d strays %g pt", i,
                      best);
    }
    cairo_path_destroy(p);
    cairo_destroy(cr);
    cairo_surface_destroy(s);
}
END_TEST

START_TEST(doses_sorted_as_a_stable_comparison_sort)
{
    enum { N = 5000 };
    static fig_dv a[N], ref[N], tmp[N];
    static uint64_t key[N], ktmp[N];
    unsigned seed = 12345;
    for (int round = 0; round < 6; round++) {
        for (int i = 0; i < N; i++) {
            seed = seed * 1103515245u + 12345u;
            unsigned r = seed >> 8;
            double d;
            switch (r % 9) {
            case 0: d = 0.0; break;
            case 1: d = -0.0; break;
            case 2: d = (double)(r % 7); break;              /* ties */
            case 3: d = -(double)(r % 5) * 0.25; break;
            case 4: d = ldexp((double)(r % 1000), (int)(r % 60) - 30); break;
            case 5: d = 4.9e-324 * (r % 3); break;           /* subnormals */
            case 6: d = (r & 1) ? INFINITY : -INFINITY; break;
            default: d = (double)r / 1e3; break;
            }
            if (round == 5 && i == N / 2)
                d = NAN;
            a[i] = ref[i] = (fig_dv){d, (double)i};
        }
        qsort(ref, N, sizeof *ref, cmp_desc_ref);
        fig_dv_sort_desc(a, tmp, key, ktmp, N);
        if (round < 5) {
            for (int i = 0; i < N; i++)
                ck_assert_msg(memcmp(&a[i], &ref[i], sizeof a[i]) == 0,
                              "round %d, %d: %a (%g) != %a (%g)", round, i, a[i].d, a[i].v,
                              ref[i].d, ref[i].v);
        } else {
            /* every element still there, once */
            static bool seen[N];
            memset(seen, 0, sizeof seen);
            for (int i = 0; i < N; i++) {
                int v = (int)a[i].v;
                ck_assert(v >= 0 && v < N && !seen[v]);
                seen[v] = true;
            }
        }
    }
}
END_TEST

/* Last: the font libraries' caches released, as the tool does at its end,
 * so that the leak checkers of the sanitizer build see only real leaks.
 * cairo's reset asserts (and the tool would abort after writing its
 * reports) while a font of a map is alive: with a map still held by
 * another thread, the release waits until that thread lets it go. The
 * earlier tests drew text, so the map holds fonts. */
START_TEST(caches_released)
{
    held_map h = {g_object_ref(pango_cairo_font_map_get_default()), false};
    pthread_t t;
    ck_assert_int_eq(pthread_create(&t, NULL, drop_later, &h), 0);
    sl_report_release_caches();
    ck_assert_msg(atomic_load(&h.dropped), "the caches were reset while a font map was held");
    pthread_join(t, NULL);
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
    tcase_add_test(tc, path_data_rounded_to_hundredths);
    tcase_add_test(tc, same_figure_same_bytes);
    tcase_add_test(tc, paths_thinned_within_tolerance);
    tcase_add_test(tc, paths_thinned_within_tolerance_on_the_page);
    tcase_add_test(tc, doses_sorted_as_a_stable_comparison_sort);
    tcase_add_test(tc, distance_rings_lie_at_their_distance);
    tcase_add_test(tc, caches_released);
    suite_add_tcase(s, tc);
    return s;
}

SL_CHECK_MAIN(figure_suite)
