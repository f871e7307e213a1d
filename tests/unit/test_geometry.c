/*
 * Unit tests of the geometry stage: IEC 61217 frames (worked cases derived by
 * hand from the IEC 61217 definitions and the DICOM Patient Position
 * definitions), outlines and signed distances (analytic values), the body
 * path length (ray-box geometry by hand) and organ sampling volumes
 * (analytic volumes of spheres, cylinders and shells; the shoelace formula).
 */
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "check_main.h"
#include "strayline/field.h"
#include "strayline/frame.h"
#include "strayline/outline.h"
#include "strayline/poly2d.h"
#include "strayline/sampling.h"
#include "strayline/slices.h"
#include "strayline/surface.h"

#define TOL 1e-9

static void assert_vec(sl_vec3 got, double x, double y, double z, double tol)
{
    ck_assert_msg(fabs(got.x - x) < tol && fabs(got.y - y) < tol && fabs(got.z - z) < tol,
                  "got (%g, %g, %g), expected (%g, %g, %g)", got.x, got.y, got.z, x, y, z);
}

/* ------------------------------------------------------------ frames -- */

static sl_vec3 bld(sl_position pos, double g, double c, double t, sl_vec3 offset)
{
    sl_frame f;
    sl_vec3 iso = {1.0, 2.0, 3.0};
    sl_frame_init(&f, pos, g, c, t, 0, iso, 100);
    return sl_frame_to_bld(&f, (sl_vec3){iso.x + offset.x, iso.y + offset.y, iso.z + offset.z});
}

static const sl_vec3 LEFT = {1, 0, 0}, POSTERIOR = {0, 1, 0}, HEAD = {0, 0, 1};

/* HFS: IEC X = x (patient left), Y = z (head), Z = -y (anterior up). */
START_TEST(frame_hfs_gantry_0)
{
    assert_vec(bld(SL_POS_HFS, 0, 0, 0, LEFT), 1, 0, 0, TOL);
    assert_vec(bld(SL_POS_HFS, 0, 0, 0, HEAD), 0, 1, 0, TOL);
    assert_vec(bld(SL_POS_HFS, 0, 0, 0, POSTERIOR), 0, 0, -1, TOL);
    sl_frame f;
    sl_frame_init(&f, SL_POS_HFS, 0, 0, 0, 0, (sl_vec3){1, 2, 3}, 100);
    assert_vec(sl_frame_source(&f), 1, 2 - 100, 3, TOL); /* anterior */
    assert_vec(sl_frame_direction(&f), 0, 1, 0, TOL);    /* beam travels posteriorly */
}
END_TEST

/* IEC 61217: positive gantry rotation is clockwise seen from the isocentre
 * looking at the gantry, so G90 brings the source to an HFS patient's left
 * and G270 to the right. */
START_TEST(frame_hfs_gantry_90_and_270)
{
    sl_frame f;
    sl_frame_init(&f, SL_POS_HFS, 90, 0, 0, 0, (sl_vec3){0, 0, 0}, 100);
    assert_vec(sl_frame_source(&f), 100, 0, 0, TOL);
    assert_vec(bld(SL_POS_HFS, 90, 0, 0, LEFT), 0, 0, 1, TOL); /* left is toward the source */
    assert_vec(bld(SL_POS_HFS, 90, 0, 0, HEAD), 0, 1, 0, TOL);
    sl_frame_init(&f, SL_POS_HFS, 270, 0, 0, 0, (sl_vec3){0, 0, 0}, 100);
    assert_vec(sl_frame_source(&f), -100, 0, 0, TOL);
    assert_vec(bld(SL_POS_HFS, 270, 0, 0, LEFT), 0, 0, -1, TOL);
}
END_TEST

/* HFP: X = -x, Y = z, Z = y (the back is up). */
START_TEST(frame_hfp_and_ffs)
{
    sl_frame f;
    sl_frame_init(&f, SL_POS_HFP, 0, 0, 0, 0, (sl_vec3){0, 0, 0}, 100);
    assert_vec(sl_frame_source(&f), 0, 100, 0, TOL); /* posterior */
    assert_vec(bld(SL_POS_HFP, 0, 0, 0, LEFT), -1, 0, 0, TOL);
    /* FFS: X = -x, Y = -z, Z = -y */
    assert_vec(bld(SL_POS_FFS, 0, 0, 0, LEFT), -1, 0, 0, TOL);
    assert_vec(bld(SL_POS_FFS, 0, 0, 0, HEAD), 0, -1, 0, TOL);
    sl_frame_init(&f, SL_POS_FFS, 90, 0, 0, 0, (sl_vec3){0, 0, 0}, 100);
    assert_vec(sl_frame_source(&f), -100, 0, 0, TOL); /* FFS G90: the patient's right */
    /* FFP: X = x, Y = -z, Z = y */
    assert_vec(bld(SL_POS_FFP, 0, 0, 0, POSTERIOR), 0, 0, 1, TOL);
}
END_TEST

/* Decubitus: HFDL lies on the left side, so the right side (-x) faces the
 * source at G0: Z = -x; the anterior faces IEC +X: X = -y. */
START_TEST(frame_decubitus)
{
    sl_frame f;
    sl_frame_init(&f, SL_POS_HFDL, 0, 0, 0, 0, (sl_vec3){0, 0, 0}, 100);
    assert_vec(sl_frame_source(&f), -100, 0, 0, TOL);
    assert_vec(bld(SL_POS_HFDL, 0, 0, 0, POSTERIOR), -1, 0, 0, TOL);
    sl_frame_init(&f, SL_POS_HFDR, 0, 0, 0, 0, (sl_vec3){0, 0, 0}, 100);
    assert_vec(sl_frame_source(&f), 100, 0, 0, TOL);
    sl_frame_init(&f, SL_POS_FFDL, 0, 0, 0, 0, (sl_vec3){0, 0, 0}, 100);
    assert_vec(sl_frame_source(&f), -100, 0, 0, TOL);
    assert_vec(bld(SL_POS_FFDL, 0, 0, 0, HEAD), 0, -1, 0, TOL);
    sl_frame_init(&f, SL_POS_FFDR, 0, 0, 0, 0, (sl_vec3){0, 0, 0}, 100);
    assert_vec(sl_frame_source(&f), 100, 0, 0, TOL);
}
END_TEST

/* Couch 90 (counter-clockwise seen from above) turns the support X axis
 * onto fixed Y: the patient's left points along BLD y. */
START_TEST(frame_couch_90)
{
    assert_vec(bld(SL_POS_HFS, 0, 0, 90, LEFT), 0, 1, 0, TOL);
    assert_vec(bld(SL_POS_HFS, 0, 0, 90, HEAD), -1, 0, 0, TOL);
    /* the eccentric rotation adds to the couch rotation */
    sl_frame a, b;
    sl_frame_init(&a, SL_POS_HFS, 30, 10, 60, 30, (sl_vec3){0, 0, 0}, 100);
    sl_frame_init(&b, SL_POS_HFS, 30, 10, 90, 0, (sl_vec3){0, 0, 0}, 100);
    for (int i = 0; i < 3; i++)
        for (int j = 0; j < 3; j++)
            ck_assert_double_eq_tol(a.r[i][j], b.r[i][j], 1e-12);
}
END_TEST

/* Collimator 90 (counter-clockwise seen from the source): BLD = Rz(-90)
 * gantry, so gantry x -> BLD -y and gantry y -> BLD x. */
START_TEST(frame_collimator_90)
{
    assert_vec(bld(SL_POS_HFS, 0, 90, 0, LEFT), 0, -1, 0, TOL);
    assert_vec(bld(SL_POS_HFS, 0, 90, 0, HEAD), 1, 0, 0, TOL);
}
END_TEST

START_TEST(frame_round_trip_and_projection)
{
    sl_frame f;
    sl_frame_init(&f, SL_POS_FFDR, 33, 71, 12, 5, (sl_vec3){4, -7, 2}, 100);
    sl_vec3 p = {3.5, 1.25, -8};
    sl_vec3 q = sl_frame_to_patient(&f, sl_frame_to_bld(&f, p));
    assert_vec(q, p.x, p.y, p.z, 1e-12);
    sl_vec2 uv;
    double s;
    ck_assert(sl_frame_project(&f, (sl_vec3){5, -2, -10}, &uv, &s));
    ck_assert_double_eq_tol(s, 1.1, 1e-12);        /* (SAD - z) / SAD */
    ck_assert_double_eq_tol(uv.x, 5 / 1.1, 1e-12); /* x SAD / (SAD - z) */
    ck_assert_double_eq_tol(uv.y, -2 / 1.1, 1e-12);
    ck_assert(!sl_frame_project(&f, (sl_vec3){0, 0, 100}, &uv, &s)); /* the source plane */
    ck_assert(!sl_frame_project(&f, (sl_vec3){0, 0, 120}, &uv, &s)); /* behind it */
}
END_TEST

/* ---------------------------------------------------------- outlines -- */

START_TEST(outline_square_distances)
{
    sl_outline *o;
    sl_error e = {0};
    ck_assert_int_eq(sl_outline_rectangle(10, 10, "square", &o, &e), SL_OK);
    ck_assert_double_eq_tol(sl_outline_area(o), 100, 1e-12);
    ck_assert_double_eq_tol(sl_outline_distance(o, (sl_vec2){7, 0}), 2, 1e-12);
    ck_assert_double_eq_tol(sl_outline_distance(o, (sl_vec2){0, 0}), -5, 1e-12);
    ck_assert_double_eq_tol(sl_outline_distance(o, (sl_vec2){4, 1}), -1, 1e-12);
    ck_assert_double_eq_tol(sl_outline_distance(o, (sl_vec2){7, 7}), sqrt(8), 1e-12);
    ck_assert_double_eq_tol(sl_outline_distance(o, (sl_vec2){5, 2}), 0, 1e-12);
    ck_assert_int_eq(sl_outline_index(o, (sl_vec2){-40, -40}, (sl_vec2){40, 40}, &e), SL_OK);
    ck_assert_double_eq_tol(sl_outline_distance(o, (sl_vec2){7, 7}), sqrt(8), 1e-12);
    ck_assert_double_eq_tol(sl_outline_distance(o, (sl_vec2){-30, 0}), 25, 1e-12);
    ck_assert_double_eq_tol(sl_outline_distance(o, (sl_vec2){100, 0}), 95, 1e-12); /* beyond */
    sl_outline_free(o);
}
END_TEST

/* A concave cutout with a hole: the index must give exactly what the full
 * scan gives, everywhere. */
START_TEST(outline_index_equals_full_scan)
{
    sl_vec2 star[40], hole[4] = {{-0.5, -0.5}, {0.5, -0.5}, {0.5, 0.5}, {-0.5, 0.5}};
    for (int i = 0; i < 40; i++) {
        double r = i % 2 ? 2.0 : 4.0 + 0.3 * sin(i);
        star[i] = (sl_vec2){r * cos(2 * M_PI * i / 40), r * sin(2 * M_PI * i / 40)};
    }
    sl_outline_loop loops[2] = {{star, 40}, {hole, 4}};
    sl_outline *a, *b;
    sl_error e = {0};
    ck_assert_int_eq(sl_outline_create(loops, 2, "star", &a, &e), SL_OK);
    ck_assert_int_eq(sl_outline_create(loops, 2, "star", &b, &e), SL_OK);
    ck_assert_int_eq(sl_outline_loop_depth(a, 1), 1);
    ck_assert_int_eq(sl_outline_index(b, (sl_vec2){-10, -10}, (sl_vec2){10, 10}, &e), SL_OK);
    srand(7);
    for (int k = 0; k < 20000; k++) {
        sl_vec2 q = {-12 + 24.0 * rand() / RAND_MAX, -12 + 24.0 * rand() / RAND_MAX};
        ck_assert_double_eq(sl_outline_distance(a, q), sl_outline_distance(b, q));
    }
    ck_assert(sl_outline_distance(b, (sl_vec2){0, 0}) > 0); /* in the hole: outside */
    ck_assert(sl_outline_distance(b, (sl_vec2){1.0, 0.2}) < 0);
    sl_outline_free(a);
    sl_outline_free(b);
}
END_TEST

/* sl_outline_convex: a square and a circle of 64 points (either way round)
 * are convex; an L, a square with a point on a side (a straight corner),
 * and the star with its hole are not. */
START_TEST(outline_convexity)
{
    sl_vec2 sq[4] = {{0, 0}, {4, 0}, {4, 4}, {0, 4}}, sq_cw[4] = {{0, 0}, {0, 4}, {4, 4}, {4, 0}};
    sl_vec2 ell[6] = {{0, 0}, {4, 0}, {4, 1}, {1, 1}, {1, 4}, {0, 4}};
    sl_vec2 side[5] = {{0, 0}, {2, 0}, {4, 0}, {4, 4}, {0, 4}}, circ[64];
    for (int i = 0; i < 64; i++)
        circ[i] = (sl_vec2){3 * cos(2 * M_PI * i / 64), 3 * sin(2 * M_PI * i / 64)};
    const struct {
        sl_vec2 *p;
        size_t n;
        bool convex;
    } c[] = {{sq, 4, true}, {sq_cw, 4, true}, {circ, 64, true}, {ell, 6, false},
             {side, 5, false}};
    sl_error e = {0};
    for (size_t k = 0; k < sizeof c / sizeof *c; k++) {
        sl_outline_loop l = {c[k].p, c[k].n};
        sl_outline *o;
        ck_assert_int_eq(sl_outline_create(&l, 1, "shape", &o, &e), SL_OK);
        ck_assert_msg(sl_outline_convex(o) == c[k].convex, "shape %zu", k);
        sl_outline_free(o);
    }
    sl_vec2 star[40], hole[4] = {{-0.5, -0.5}, {0.5, -0.5}, {0.5, 0.5}, {-0.5, 0.5}};
    for (int i = 0; i < 40; i++)
        star[i] = (sl_vec2){4 * cos(2 * M_PI * i / 40), 4 * sin(2 * M_PI * i / 40)};
    sl_outline_loop loops[2] = {{star, 40}, {hole, 4}};
    sl_outline *o;
    ck_assert_int_eq(sl_outline_create(loops, 2, "ring", &o, &e), SL_OK);
    ck_assert(!sl_outline_convex(o));
    sl_outline_free(o);
}
END_TEST

START_TEST(outline_refuses_bad_polygons)
{
    sl_outline *o;
    sl_error e = {0};
    sl_vec2 bowtie[4] = {{0, 0}, {4, 2}, {4, 0}, {0, 3}};
    sl_outline_loop l = {bowtie, 4};
    ck_assert_int_eq(sl_outline_create(&l, 1, "bowtie", &o, &e), SL_EINPUT);
    ck_assert_ptr_nonnull(strstr(e.msg, "crosses itself"));
    sl_vec2 two[3] = {{0, 0}, {1, 1}, {1, 1}};
    l = (sl_outline_loop){two, 3};
    ck_assert_int_eq(sl_outline_create(&l, 1, "two", &o, &e), SL_EINPUT);
    ck_assert_ptr_nonnull(strstr(e.msg, "2 distinct points"));
    sl_vec2 flat[3] = {{0, 0}, {1, 0}, {2, 0}};
    l = (sl_outline_loop){flat, 3};
    ck_assert_int_eq(sl_outline_create(&l, 1, "flat", &o, &e), SL_EINPUT);
    sl_vec2 fold[5] = {{0, 0}, {3, 0}, {1, 0}, {1, 2}, {0, 2}};
    l = (sl_outline_loop){fold, 5};
    ck_assert_int_eq(sl_outline_create(&l, 1, "fold", &o, &e), SL_EINPUT);
    /* repeated points and a repeated closing point are harmless */
    sl_vec2 rep[7] = {{0, 0}, {0, 0}, {4, 0}, {4, 4}, {4, 4}, {0, 4}, {0, 0}};
    l = (sl_outline_loop){rep, 7};
    ck_assert_int_eq(sl_outline_create(&l, 1, "repeated", &o, &e), SL_OK);
    ck_assert_double_eq_tol(sl_outline_area(o), 16, 1e-12);
    sl_outline_free(o);
    /* two loops that cross */
    sl_vec2 s1[4] = {{0, 0}, {4, 0}, {4, 4}, {0, 4}}, s2[4] = {{2, 2}, {6, 2}, {6, 6}, {2, 6}};
    sl_outline_loop two_loops[2] = {{s1, 4}, {s2, 4}};
    ck_assert_int_eq(sl_outline_create(two_loops, 2, "overlap", &o, &e), SL_EINPUT);
    /* more vertices than the simple-polygon check is meant for: refused
     * before the pairwise check starts */
    size_t nbig = SL_OUTLINE_MAX_VERTICES + 1;
    sl_vec2 *big = malloc(nbig * sizeof *big);
    for (size_t i = 0; i < nbig; i++)
        big[i] = (sl_vec2){5 * cos(2 * M_PI * (double)i / (double)nbig),
                           5 * sin(2 * M_PI * (double)i / (double)nbig)};
    l = (sl_outline_loop){big, nbig};
    ck_assert_int_eq(sl_outline_create(&l, 1, "dense", &o, &e), SL_EINPUT);
    ck_assert_ptr_nonnull(strstr(e.msg, "vertices (at most"));
    free(big);
}
END_TEST

START_TEST(circle_keeps_its_area)
{
    sl_outline *o;
    sl_error e = {0};
    ck_assert_int_eq(sl_outline_circle(8, "circle", &o, &e), SL_OK);
    ck_assert_double_eq_tol(sl_outline_area(o), M_PI * 16, 1e-9);
    ck_assert_double_eq_tol(sl_outline_distance(o, (sl_vec2){10, 0}), 6, 2e-3);
    sl_outline_free(o);
}
END_TEST

/* ------------------------------------------------------------- ROIs -- */

typedef struct roi_builder {
    sl_roi roi;
    size_t cap;
} roi_builder;

static void rb_add(roi_builder *b, sl_contour_type t, const sl_vec3 *pts, size_t n)
{
    if (b->roi.ncontours == b->cap) {
        b->cap = b->cap ? b->cap * 2 : 16;
        b->roi.contours = realloc(b->roi.contours, b->cap * sizeof *b->roi.contours);
    }
    sl_contour *c = &b->roi.contours[b->roi.ncontours++];
    c->type = t;
    c->npoints = n;
    c->points = malloc(n * sizeof *pts);
    memcpy(c->points, pts, n * sizeof *pts);
}

/* A circle of radius r (mm) at height z (mm), n vertices, clockwise if cw. */
static void rb_circle(roi_builder *b, double cx, double cy, double r, double z, int n, bool cw)
{
    sl_vec3 *p = malloc((size_t)n * sizeof *p);
    for (int i = 0; i < n; i++) {
        double a = 2 * M_PI * i / n * (cw ? -1 : 1);
        p[i] = (sl_vec3){cx + r * cos(a), cy + r * sin(a), z};
    }
    rb_add(b, SL_CONTOUR_CLOSED_PLANAR, p, (size_t)n);
    free(p);
}

static void rb_free(roi_builder *b)
{
    for (size_t i = 0; i < b->roi.ncontours; i++)
        free(b->roi.contours[i].points);
    free(b->roi.contours);
}

static double sampled_volume(roi_builder *b, size_t *n, double *pitch)
{
    sl_sampling_options opt;
    sl_sampling_default_options(&opt);
    sl_organ_samples s;
    sl_error e = {0};
    b->roi.name = "test";
    ck_assert_int_eq(sl_sample_roi(&b->roi, "test", &opt, &s, &e), SL_OK);
    double v = s.volume_cc_total;
    if (n)
        *n = s.n;
    if (pitch)
        *pitch = s.pitch_cm;
    sl_organ_samples_free(&s);
    return v;
}

/* Sphere of radius R = 30 mm on slices 2.5 mm apart: analytic 4/3 pi R^3. */
START_TEST(sphere_volume)
{
    roi_builder b = {0};
    double R = 30, step = 2.5;
    for (int k = -11; k <= 11; k++) {
        double z = k * step;
        rb_circle(&b, 5, -3, sqrt(R * R - z * z), z, 128, false);
    }
    size_t n;
    double v = sampled_volume(&b, &n, NULL);
    double want = 4.0 / 3 * M_PI * 27; /* cm3 */
    ck_assert_msg(fabs(v - want) / want < 0.02, "sphere: %g cm3 against %g", v, want);
    ck_assert_uint_gt(n, 1000);
    rb_free(&b);
}
END_TEST

/* Cylinder r = 20 mm, 50 mm long, slices at the slab centres. */
START_TEST(cylinder_volume)
{
    roi_builder b = {0};
    for (int k = 0; k < 10; k++)
        rb_circle(&b, 0, 0, 20, 2.5 + 5 * k, 96, k % 2);
    double v = sampled_volume(&b, NULL, NULL);
    double want = M_PI * 4 * 5;
    ck_assert_msg(fabs(v - want) / want < 0.02, "cylinder: %g cm3 against %g", v, want);
    rb_free(&b);
}
END_TEST

/* A shell: sphere R = 30 mm with a spherical hole r = 15 mm (two contours a
 * slice, combined even-odd). */
START_TEST(shell_volume)
{
    roi_builder b = {0};
    double step = 2.5;
    for (int k = -11; k <= 11; k++) {
        double z = k * step;
        rb_circle(&b, 0, 0, sqrt(900 - z * z), z, 128, false);
        if (fabs(z) < 15)
            rb_circle(&b, 0, 0, sqrt(225 - z * z), z, 96, false);
    }
    double v = sampled_volume(&b, NULL, NULL);
    double want = 4.0 / 3 * M_PI * (27 - 3.375);
    ck_assert_msg(fabs(v - want) / want < 0.02, "shell: %g cm3 against %g", v, want);
    rb_free(&b);
}
END_TEST

/* Each slice's sampled volume divided by its slab thickness equals the
 * shoelace area of its polygon (an irregular, concave one). */
START_TEST(slice_area_matches_shoelace)
{
    roi_builder b = {0};
    sl_vec3 p[12];
    sl_vec2 q[12];
    for (int i = 0; i < 12; i++) {
        double r = (i % 3 == 0 ? 18 : 30) + 4 * cos(3 * i);
        double a = 2 * M_PI * i / 12;
        p[i] = (sl_vec3){r * cos(a), r * sin(a), 0};
        q[i] = (sl_vec2){p[i].x * 0.1, p[i].y * 0.1};
    }
    rb_add(&b, SL_CONTOUR_CLOSED_PLANAR, p, 12);
    for (int i = 0; i < 12; i++)
        p[i].z = 3;
    rb_add(&b, SL_CONTOUR_CLOSED_PLANAR, p, 12);
    double v = sampled_volume(&b, NULL, NULL);
    double area = fabs(sl_p2_area(q, 12));
    ck_assert_msg(fabs(v / (2 * 0.3) - area) / area < 0.005, "area %g against shoelace %g",
                  v / 0.6, area);
    rb_free(&b);
}
END_TEST

/* A lens (about 0.17 cm3) gets hundreds of samples; a 3 L organ does not get
 * a hundred million. */
START_TEST(resolution_adapts_to_size)
{
    roi_builder lens = {0}, big = {0};
    for (int k = -1; k <= 1; k++)
        rb_circle(&lens, 0, 0, 4.5 * sqrt(1 - pow(k * 2.0 / 4.5, 2)), k * 2.0, 32, false);
    for (int k = -45; k <= 45; k++)
        rb_circle(&big, 0, 0, 90 * sqrt(1 - pow(k * 2.0 / 92, 2)), k * 2.0, 180, false);
    size_t nl, nb;
    sampled_volume(&lens, &nl, NULL);
    double vb = sampled_volume(&big, &nb, NULL);
    ck_assert_uint_ge(nl, 500);
    ck_assert_msg(vb > 2500 && vb < 3500, "big organ %g cm3", vb);
    ck_assert_uint_lt(nb, 200000);
    rb_free(&lens);
    rb_free(&big);
}
END_TEST

/* Outline samples: on the contours (here a square of 4 vertices, 6 cm a
 * side, whose edges are cut to the lattice pitch, and a 400-point circle),
 * in contour order, no chord longer than the pitch, volume 0; the volume
 * is the lattice's alone (the exact 6 x 6 x 1 cm and the 400-gon's
 * n/2 r^2 sin(2 pi / n) x 1 cm, each twice). */
START_TEST(outline_samples)
{
    roi_builder b = {0};
    for (int k = 0; k < 2; k++) {
        double z = 5.0 + 10.0 * k;
        sl_vec3 sq[4] = {{-30, -30, z}, {30, -30, z}, {30, 30, z}, {-30, 30, z}};
        rb_add(&b, SL_CONTOUR_CLOSED_PLANAR, sq, 4);
        rb_circle(&b, 100, 0, 20, z, 400, false);
    }
    sl_sampling_options opt;
    sl_sampling_default_options(&opt);
    sl_organ_samples s;
    sl_error e = {0};
    b.roi.name = "outline";
    ck_assert_int_eq(sl_sample_roi(&b.roi, "t", &opt, &s, &e), SL_OK);
    ck_assert_uint_eq(s.noutline_loops, 4);
    ck_assert_uint_gt(s.n_outline, 0);
    size_t base = s.n - s.n_outline;
    double vlat = 0;
    for (size_t i = 0; i < base; i++)
        vlat += s.volume_cc[i];
    ck_assert_double_eq_tol(vlat, s.volume_cc_total, 1e-9);
    ck_assert_double_eq_tol(s.volume_cc_total, 36 * 2 + 200 * 4 * sin(2 * M_PI / 400) * 2, 1e-6);
    for (size_t l = 0; l < s.noutline_loops; l++) {
        size_t f = s.outline_loop_first[l], end = s.outline_loop_first[l + 1];
        ck_assert_uint_gt(end - f, 3);
        for (size_t k = f; k < end; k++) {
            sl_vec3 p = s.points[base + k], q = s.points[base + (k + 1 < end ? k + 1 : f)];
            ck_assert_double_eq(s.volume_cc[base + k], 0);
            ck_assert(hypot(q.x - p.x, q.y - p.y) <= s.pitch_cm + 1e-12);
            bool square = fabs(p.x) < 3.5;
            double off = square ? fmin(fabs(fabs(p.x) - 3), fabs(fabs(p.y) - 3))
                                : fabs(hypot(p.x - 10, p.y) - 2);
            /* the circle's own vertices lie on it; the square's pieces on its sides */
            ck_assert_msg(off < 1e-9, "outline sample %zu off its contour by %g cm", k, off);
            if (square)
                ck_assert(fabs(p.x) <= 3 + 1e-12 && fabs(p.y) <= 3 + 1e-12);
        }
    }
    sl_organ_samples_free(&s);
    rb_free(&b);
}
END_TEST

START_TEST(points_and_open_contours)
{
    roi_builder b = {0};
    sl_vec3 pt = {10, 20, 30};
    rb_add(&b, SL_CONTOUR_POINT, &pt, 1);
    sl_sampling_options opt;
    sl_sampling_default_options(&opt);
    sl_organ_samples s;
    sl_error e = {0};
    b.roi.name = "marker";
    ck_assert_int_eq(sl_sample_roi(&b.roi, "t", &opt, &s, &e), SL_OK);
    ck_assert(s.is_point);
    ck_assert_uint_eq(s.n, 1);
    assert_vec(s.points[0], 1, 2, 3, 1e-12);
    sl_organ_samples_free(&s);
    sl_vec3 line[2] = {{0, 0, 0}, {10, 0, 0}};
    rb_add(&b, SL_CONTOUR_OPEN_PLANAR, line, 2);
    ck_assert_int_eq(sl_sample_roi(&b.roi, "t", &opt, &s, &e), SL_OK);
    ck_assert_uint_eq(s.notes.count, 1);
    ck_assert_ptr_nonnull(strstr(s.notes.items[0], "open contours ignored"));
    sl_organ_samples_free(&s);
    /* a contour that is not axial */
    sl_vec3 tilted[3] = {{0, 0, 0}, {10, 0, 5}, {0, 10, 0}};
    roi_builder t = {0};
    rb_add(&t, SL_CONTOUR_CLOSED_PLANAR, tilted, 3);
    t.roi.name = "tilted";
    ck_assert_int_eq(sl_sample_roi(&t.roi, "t", &opt, &s, &e), SL_EINPUT);
    ck_assert_ptr_nonnull(strstr(e.msg, "not in an axial plane"));
    rb_free(&b);
    rb_free(&t);
}
END_TEST

START_TEST(degenerate_rois_are_refused)
{
    sl_sampling_options opt;
    sl_sampling_default_options(&opt);
    sl_organ_samples s;
    sl_error e = {0};
    /* a closed contour of collinear points has no inside: its dose would
     * be 0/0, so it is an input error naming the ROI and contour */
    roi_builder w = {0};
    sl_vec3 wire[3] = {{0, 0, 0}, {10, 0, 0}, {20, 0, 0}};
    rb_add(&w, SL_CONTOUR_CLOSED_PLANAR, wire, 3);
    w.roi.name = "Wire";
    ck_assert_int_eq(sl_sample_roi(&w.roi, "ss.dcm", &opt, &s, &e), SL_EINPUT);
    ck_assert_ptr_nonnull(strstr(e.msg, "ss.dcm: ROI 'Wire': contour 1"));
    ck_assert_ptr_nonnull(strstr(e.msg, "encloses no area"));
    /* beside a real contour, a flat one is dropped with a note */
    rb_circle(&w, 0, 0, 10, 2.5, 32, false);
    ck_assert_int_eq(sl_sample_roi(&w.roi, "ss.dcm", &opt, &s, &e), SL_OK);
    ck_assert_uint_gt(s.n, 0);
    bool noted = false;
    for (size_t i = 0; i < s.notes.count; i++)
        noted |= strstr(s.notes.items[i], "1 closed contours that enclose no area ignored") != NULL;
    ck_assert(noted);
    sl_organ_samples_free(&s);
    rb_free(&w);
    /* more closed contours than can ever fit the sample cap (each gives at
     * least one sample): refused, where the coarsening would never end */
    roi_builder t = {0};
    for (int i = 0; i < 100001; i++) {
        double x = (i % 400) * 3.0, z = (i / 400) * 2.0;
        sl_vec3 tri[3] = {{x, 0, z}, {x + 1, 0, z}, {x, 1, z}};
        rb_add(&t, SL_CONTOUR_CLOSED_PLANAR, tri, 3);
    }
    t.roi.name = "Confetti";
    ck_assert_int_eq(sl_sample_roi(&t.roi, "ss.dcm", &opt, &s, &e), SL_EINPUT);
    ck_assert_ptr_nonnull(strstr(e.msg, "100001 closed contours"));
    rb_free(&t);
}
END_TEST

/* --------------------------------------------------------------- body -- */

/* Box body: x -100..100, y -50..50 mm, slices z = -100..100 mm every 10 mm,
 * so the slabs reach z = -105..105 mm. */
static sl_body *box_body_xy(double x0, double x1, double y0, double y1)
{
    roi_builder b = {0};
    for (int k = -10; k <= 10; k++) {
        double z = k * 10.0;
        sl_vec3 p[4] = {{x0, y0, z}, {x1, y0, z}, {x1, y1, z}, {x0, y1, z}};
        rb_add(&b, SL_CONTOUR_CLOSED_PLANAR, p, 4);
    }
    b.roi.name = "BODY";
    sl_slice_stack st;
    sl_error e = {0};
    ck_assert_int_eq(sl_slices_build(&b.roi, "t", 0.3, &st, &e), SL_OK);
    ck_assert_uint_eq(st.nslices, 21);
    ck_assert_double_eq_tol(st.slices[0].z_lo_cm, -10.5, 1e-12);
    sl_body *body;
    ck_assert_int_eq(sl_body_create(&st, "box", &body, &e), SL_OK);
    sl_slices_free(&st);
    rb_free(&b);
    return body;
}

static sl_body *box_body(void)
{
    return box_body_xy(-100, 100, -50, 50);
}

START_TEST(body_path_lengths_in_a_box)
{
    sl_body *body = box_body();
    double t;
    /* vertical ray from the anterior, stopping 3 cm deep */
    double d = sl_body_path(body, (sl_vec3){0, -100, 0}, (sl_vec3){0, -2, 0}, &t);
    ck_assert_double_eq_tol(d, 3, 1e-9);
    ck_assert_double_eq_tol(t, 95.0 / 98.0, 1e-9);
    /* right through: the box is 10 cm thick */
    ck_assert_double_eq_tol(sl_body_path(body, (sl_vec3){1, -100, 1}, (sl_vec3){1, 100, 1}, NULL),
                            10, 1e-9);
    /* oblique ray in the x-y plane: 10 cm thick at 45 degrees */
    ck_assert_double_eq_tol(
        sl_body_path(body, (sl_vec3){-20, -20, 0.3}, (sl_vec3){20, 20, 0.3}, NULL),
        10 * sqrt(2), 1e-9);
    /* oblique through slabs: from above the head end down through the box */
    double len = sl_body_path(body, (sl_vec3){0, 0, 20}, (sl_vec3){0, 0, -20}, NULL);
    ck_assert_double_eq_tol(len, 21, 1e-9);
    double len2 = sl_body_path(body, (sl_vec3){0, -15, 15}, (sl_vec3){0, 15, -15}, NULL);
    ck_assert_double_eq_tol(len2, 10 * sqrt(2), 1e-9);
    /* a ray that misses */
    ck_assert_double_eq(sl_body_path(body, (sl_vec3){30, -100, 0}, (sl_vec3){30, 100, 0}, &t), 0);
    ck_assert(isnan(t));
    ck_assert(sl_body_contains(body, (sl_vec3){9.9, 4.9, 10.4}));
    ck_assert(!sl_body_contains(body, (sl_vec3){10.1, 0, 0}));
    ck_assert(!sl_body_contains(body, (sl_vec3){0, 0, 10.6}));
    sl_body_free(body);
}
END_TEST

/* A bolus 1.5 cm thick on the anterior surface of the box, drawn 5 mm into
 * it: the union counts the overlap once (hand geometry). */
START_TEST(body_and_bolus_union)
{
    sl_body *body = box_body();
    sl_body *bolus = box_body_xy(-30, 30, -60, -45);
    const sl_body *parts[2] = {body, bolus};
    double t;
    /* vertical ray stopping 3 cm below the skin: 1 cm of bolus above it */
    double d = sl_bodies_path(parts, 2, (sl_vec3){0, -100, 0}, (sl_vec3){0, -2, 0}, &t);
    ck_assert_double_eq_tol(d, 4, 1e-9);
    ck_assert_double_eq_tol(t, 94.0 / 98.0, 1e-9);
    /* one part alone is sl_body_path */
    ck_assert_double_eq_tol(sl_bodies_path(parts, 1, (sl_vec3){0, -100, 0}, (sl_vec3){0, -2, 0},
                                           NULL),
                            3, 1e-9);
    /* through several slabs: (0,-10,3) to (0,-2,-3) is 10 cm long, y = -10 + 8 t;
     * the union holds y in [-6, -2] (t in [0.5, 1]), the body y in [-5, -2] */
    ck_assert_double_eq_tol(
        sl_bodies_path(parts, 2, (sl_vec3){0, -10, 3}, (sl_vec3){0, -2, -3}, NULL), 5, 1e-9);
    ck_assert_double_eq_tol(sl_body_path(body, (sl_vec3){0, -10, 3}, (sl_vec3){0, -2, -3}, NULL),
                            3.75, 1e-9);
    /* beside the bolus only the body counts */
    ck_assert_double_eq_tol(
        sl_bodies_path(parts, 2, (sl_vec3){5, -100, 0}, (sl_vec3){5, -2, 0}, NULL), 3, 1e-9);
    /* the stretches themselves, in order along the segment */
    sl_spans sp = {0};
    ck_assert_int_eq(sl_body_spans(bolus, (sl_vec3){0, -100, 0}, (sl_vec3){0, -2, 0}, &sp), SL_OK);
    ck_assert_uint_eq(sp.n, 2);
    ck_assert_double_eq_tol(sp.t[0], 94.0 / 98.0, 1e-9);
    ck_assert_double_eq_tol(sp.t[1], 95.5 / 98.0, 1e-9);
    sl_spans_free(&sp);
    sl_body_free(bolus);
    sl_body_free(body);
}
END_TEST

/* The fan (a body indexed for one source) gives the grid walk's lengths:
 * a wavy body whose outline changes from slice to slice (steps between
 * slabs, as real contours have), rays from sources around it to random
 * points, in and beyond the body, with and without a bolus. */
START_TEST(fan_matches_the_grid_walk)
{
    roi_builder b = {0};
    enum { NPTS = 400 };
    sl_vec3 *p = malloc(NPTS * sizeof *p);
    for (int k = -20; k <= 20; k++) {
        double z = k * 2.5;
        for (int i = 0; i < NPTS; i++) {
            double a = 2 * M_PI * i / NPTS;
            double w = 1 + 0.03 * sin(7 * a + k) + 0.01 * sin(31 * a);
            p[i] = (sl_vec3){175 * w * cos(a), 125 * w * sin(a), z};
        }
        rb_add(&b, SL_CONTOUR_CLOSED_PLANAR, p, NPTS);
    }
    free(p);
    b.roi.name = "BODY";
    sl_slice_stack st;
    sl_error e = {0};
    ck_assert_int_eq(sl_slices_build(&b.roi, "t", 0.25, &st, &e), SL_OK);
    sl_body *body;
    ck_assert_int_eq(sl_body_create(&st, "wavy", &body, &e), SL_OK);
    sl_slices_free(&st);
    rb_free(&b);
    sl_body *bolus = box_body_xy(-60, 60, -140, -118);
    const sl_body *parts[2] = {body, bolus};
    unsigned seed = 12345;
    double worst = 0;
    int fans = 0;
    const double gantry[] = {0, 40, 90, 180, 320, 271};
    for (size_t g = 0; g < sizeof gantry / sizeof *gantry; g++) {
        double ga = gantry[g] * M_PI / 180;
        sl_vec3 src = {100 * sin(ga), -100 * cos(ga), (g % 3) * 7.0 - 5};
        sl_body_fan *f = NULL, *fb = NULL;
        ck_assert_int_eq(sl_body_fan_create(body, src, 0, &f, &e), SL_OK);
        ck_assert_int_eq(sl_body_fan_create(bolus, src, 1, &fb, &e), SL_OK);
        ck_assert_ptr_nonnull(f);
        ck_assert_ptr_nonnull(fb);
        fans++;
        const sl_body_fan *fparts[2] = {f, fb};
        for (int n = 0; n < 20000; n++) {
            sl_vec3 q = {((double)rand_r(&seed) / RAND_MAX - 0.5) * 40,
                         ((double)rand_r(&seed) / RAND_MAX - 0.5) * 30,
                         ((double)rand_r(&seed) / RAND_MAX - 0.5) * 12};
            if (n % 7 == 0)
                q.z = src.z; /* an axial ray: one slab */
            double t1, t2;
            double want = sl_body_path(body, src, q, &t1);
            double got = sl_body_fan_path(f, q, &t2);
            worst = fmax(worst, fabs(want - got));
            ck_assert_msg(fabs(want - got) < 1e-9, "gantry %g point (%g, %g, %g): %.12g vs %.12g",
                          gantry[g], q.x, q.y, q.z, want, got);
            ck_assert(isnan(t1) == isnan(t2));
            if (!isnan(t1))
                ck_assert_double_eq_tol(t1, t2, 1e-9);
            double uw = sl_bodies_path(parts, 2, src, q, &t1);
            double ug = sl_fans_path(fparts, 2, q, &t2);
            ck_assert_double_eq_tol(uw, ug, 1e-9);
        }
        sl_body_fan_free(f);
        sl_body_fan_free(fb);
    }
    ck_assert_int_eq(fans, 6);
    ck_assert(worst < 1e-9);
    /* a source over the body (a beam along z): no fan, the caller traces */
    sl_body_fan *none = (sl_body_fan *)1;
    ck_assert_int_eq(sl_body_fan_create(body, (sl_vec3){0, 0, 100}, 0, &none, &e), SL_OK);
    ck_assert_ptr_null(none);
    sl_body_free(bolus);
    sl_body_free(body);
}
END_TEST

/* A 20 x 20 cm square slice whose bottom edge is a zigzag of n teeth
 * 0.01 mm high between x0 and x1 (mm). */
static sl_status zigzag_body(int n, double x0, double x1, sl_body **body, sl_error *e)
{
    size_t np = (size_t)n + 5;
    sl_vec3 *p = malloc(np * sizeof *p);
    size_t k = 0;
    p[k++] = (sl_vec3){-100, -100, 0};
    for (int i = 0; i <= n; i++)
        p[k++] = (sl_vec3){x0 + (x1 - x0) * i / n, -100 + (i % 2) * 0.01, 0};
    p[k++] = (sl_vec3){100, -100, 0};
    p[k++] = (sl_vec3){100, 100, 0};
    p[k++] = (sl_vec3){-100, 100, 0};
    roi_builder b = {0};
    rb_add(&b, SL_CONTOUR_CLOSED_PLANAR, p, k);
    free(p);
    b.roi.name = "BODY";
    sl_slice_stack st;
    ck_assert_int_eq(sl_slices_build(&b.roi, "t", 0.3, &st, e), SL_OK);
    sl_status rc = sl_body_create(&st, "dense body", body, e);
    sl_slices_free(&st);
    rb_free(&b);
    return rc;
}

START_TEST(dense_body_contours)
{
    sl_body *body = NULL;
    sl_error e = {0};
    /* hundreds of edges a grid cell: the walk's scratch goes to the heap,
     * the path is still the square's 20 cm */
    ck_assert_int_eq(zigzag_body(40000, -99, 99, &body, &e), SL_OK);
    double d = sl_body_path(body, (sl_vec3){0.0123, -15, 0}, (sl_vec3){0.0123, 15, 0}, NULL);
    ck_assert_double_eq_tol(d, 20, 2e-3);
    sl_body_free(body);
    /* tens of thousands of edges in a few cells: refused, not traced */
    ck_assert_int_eq(zigzag_body(30000, -99, -89, &body, &e), SL_EINPUT);
    ck_assert_ptr_nonnull(strstr(e.msg, "dense body: the contours at z = 0.00 cm are too dense"));
}
END_TEST

/* ------------------------------------------------------------ fields -- */

START_TEST(field_from_cutout_catalogue_and_geometry)
{
    sl_plan plan = {0};
    plan.source = "plan.dcm";
    sl_beam beam = {0};
    beam.number = 1;
    beam.sad_mm = 1000;
    beam.applicator.present = true;
    beam.applicator.id = "A10";
    beam.applicator.opening_mm = beam.applicator.opening_x_mm = beam.applicator.opening_y_mm = NAN;
    sl_field f;
    sl_error e = {0};
    /* neither cutout nor size: an input error that says what to give */
    ck_assert_int_eq(sl_field_build(&plan, &beam, NULL, 0, &f, &e), SL_EINPUT);
    ck_assert_ptr_nonnull(strstr(e.msg, "field size is unknown"));
    /* the catalogue at nominal SSD 100 cm, SAD 100 cm */
    sl_applicator_size cat = {"A10", false, 10, 10, 100};
    ck_assert_int_eq(sl_field_build(&plan, &beam, &cat, 1, &f, &e), SL_OK);
    ck_assert_int_eq(f.source, SL_FIELD_CATALOGUE);
    ck_assert_double_eq_tol(f.area_cm2, 100, 1e-9);
    sl_field_free(&f);
    /* a cutout with a shielding block inside it */
    sl_vec2 cut[4] = {{-30, -20}, {30, -20}, {30, 20}, {-30, 20}};
    sl_vec2 shield[4] = {{-5, -5}, {5, -5}, {5, 5}, {-5, 5}};
    sl_block blocks[2] = {{.type = SL_BLOCK_APERTURE, .npoints = 4, .points = cut},
                          {.type = SL_BLOCK_SHIELDING, .npoints = 4, .points = shield}};
    beam.nblocks = 2;
    beam.blocks = blocks;
    ck_assert_int_eq(sl_field_build(&plan, &beam, &cat, 1, &f, &e), SL_OK);
    ck_assert_int_eq(f.source, SL_FIELD_CUTOUT);
    ck_assert_double_eq_tol(f.area_cm2, 24 - 1, 1e-9);
    ck_assert_double_eq_tol(sl_outline_distance(f.edge, (sl_vec2){0, 0}), 0.5, 1e-12);
    ck_assert_double_eq_tol(sl_outline_distance(f.applicator, (sl_vec2){0, 0}), -5, 1e-12);
    sl_field_free(&f);
    /* a shielding block outside the opening is refused */
    sl_vec2 far[4] = {{50, 50}, {60, 50}, {60, 60}, {50, 60}};
    blocks[1].points = far;
    ck_assert_int_eq(sl_field_build(&plan, &beam, &cat, 1, &f, &e), SL_EINPUT);
    ck_assert_ptr_nonnull(strstr(e.msg, "outside the field opening"));
}
END_TEST

static Suite *geometry_suite(void)
{
    Suite *s = suite_create("geometry");
    TCase *tc = tcase_create("geometry");
    tcase_set_timeout(tc, 120);
    tcase_add_test(tc, outline_convexity);
    tcase_add_test(tc, frame_hfs_gantry_0);
    tcase_add_test(tc, frame_hfs_gantry_90_and_270);
    tcase_add_test(tc, frame_hfp_and_ffs);
    tcase_add_test(tc, frame_decubitus);
    tcase_add_test(tc, frame_couch_90);
    tcase_add_test(tc, frame_collimator_90);
    tcase_add_test(tc, frame_round_trip_and_projection);
    tcase_add_test(tc, outline_square_distances);
    tcase_add_test(tc, outline_index_equals_full_scan);
    tcase_add_test(tc, outline_refuses_bad_polygons);
    tcase_add_test(tc, circle_keeps_its_area);
    tcase_add_test(tc, sphere_volume);
    tcase_add_test(tc, cylinder_volume);
    tcase_add_test(tc, shell_volume);
    tcase_add_test(tc, slice_area_matches_shoelace);
    tcase_add_test(tc, resolution_adapts_to_size);
    tcase_add_test(tc, outline_samples);
    tcase_add_test(tc, points_and_open_contours);
    tcase_add_test(tc, degenerate_rois_are_refused);
    tcase_add_test(tc, body_path_lengths_in_a_box);
    tcase_add_test(tc, body_and_bolus_union);
    tcase_add_test(tc, fan_matches_the_grid_walk);
    tcase_add_test(tc, dense_body_contours);
    tcase_add_test(tc, field_from_cutout_catalogue_and_geometry);
    suite_add_tcase(s, tc);
    return s;
}

SL_CHECK_MAIN(geometry_suite)
