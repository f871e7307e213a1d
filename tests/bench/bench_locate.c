/*
 * Benchmark of the geometry stage (`locate`), not a test: it prints figures.
 *
 * It builds, in memory, a large invented case: 40 ROIs over 200 slices with
 * about a million contour points (a body, a 5 L organ, a 1.5 L organ, 37
 * small organs down to 0.1 cm3), and three electron beams with 200-vertex
 * cutouts, then times sl_locate on one thread and on every core, reports
 * samples per second and the peak resident memory, and times the placement
 * with 8-, 200- and 2000-vertex cutouts to show that the cost of a sample
 * does not grow with the cutout. It also traces every sample's depth again
 * through the body's grid walk (sl_location_depth, the tracer locate used
 * before its per-beam fans) and prints the largest difference, which must
 * be rounding only.
 *
 * Run: meson test -C build --benchmark -v   (or ./build/tests/bench_locate)
 * Targets: the whole locate under 1 s and 512 MB on a 2-core machine.
 */
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/resource.h>
#include <time.h>

#include "strayline/locate.h"
#include "strayline/parallel.h"

static double now(void)
{
    struct timespec ts;
    clock_gettime(CLOCK_MONOTONIC, &ts);
    return ts.tv_sec + ts.tv_nsec * 1e-9;
}

static size_t total_points;

/* An elliptic cylinder or ellipsoid-like ROI: radii (mm) shrinking towards
 * its ends when `round`. */
static void make_roi(sl_roi *r, int number, const char *name, const char *type, double cx,
                     double cy, double cz, double ax, double ay, double half_len, double step,
                     int npts, int round)
{
    memset(r, 0, sizeof *r);
    r->number = number;
    r->name = strdup(name);
    r->type = strdup(type);
    int ns = (int)floor(half_len / step);
    r->contours = calloc((size_t)(2 * ns + 1), sizeof *r->contours);
    for (int k = -ns; k <= ns; k++) {
        double z = cz + k * step;
        double f = round ? sqrt(fmax(0.0, 1 - pow(k * step / (half_len + step), 2))) : 1.0;
        if (f < 0.05)
            continue;
        sl_contour *c = &r->contours[r->ncontours++];
        c->type = SL_CONTOUR_CLOSED_PLANAR;
        c->npoints = (size_t)npts;
        c->points = malloc((size_t)npts * sizeof *c->points);
        for (int i = 0; i < npts; i++) {
            double a = 2 * M_PI * i / npts;
            /* a little waviness so that edges are not all alike */
            double w = 1 + 0.03 * sin(7 * a + k);
            c->points[i] = (sl_vec3){cx + ax * f * w * cos(a), cy + ay * f * w * sin(a), z};
        }
        total_points += (size_t)npts;
    }
}

static sl_structure_set *make_structures(void)
{
    sl_structure_set *ss = calloc(1, sizeof *ss);
    ss->source = strdup("bench-structures");
    ss->sop_instance_uid = strdup("2.25.1");
    ss->nrois = 40;
    ss->rois = calloc(ss->nrois, sizeof *ss->rois);
    const double step = 2.5; /* mm: 200 slices over 50 cm */
    make_roi(&ss->rois[0], 1, "BODY", "EXTERNAL", 0, 0, 0, 175, 125, 249, step, 2500, 0);
    make_roi(&ss->rois[1], 2, "Organ_5L", "ORGAN", 20, 10, -60, 110, 80, 120, step, 2000, 1);
    make_roi(&ss->rois[2], 3, "Organ_1500cc", "ORGAN", -70, 20, 80, 70, 55, 95, step, 1500, 1);
    for (int i = 3; i < 40; i++) {
        /* from about 40 cm3 down to 0.1 cm3 */
        double r = 22.0 * pow(0.84, i - 3) + 2.2;
        char name[32];
        snprintf(name, sizeof name, "Small_%02d", i);
        double a = 2 * M_PI * i / 37;
        make_roi(&ss->rois[i], i + 1, name, "ORGAN", 110 * cos(a), 70 * sin(a) - 20,
                 -200 + 11 * i, r, r * 0.8, r, step, 200, 1);
    }
    return ss;
}

static void cutout(sl_block *b, int n, double scale)
{
    memset(b, 0, sizeof *b);
    b->type = SL_BLOCK_APERTURE;
    b->npoints = (size_t)n;
    b->points = malloc((size_t)n * sizeof *b->points);
    for (int i = 0; i < n; i++) {
        double a = 2 * M_PI * i / n;
        double r = scale * (40 + 8 * sin(5 * a) + 3 * cos(11 * a));
        b->points[i] = (sl_vec2){r * cos(a), r * sin(a)};
    }
}

static sl_plan *make_plan(int vertices)
{
    sl_plan *p = calloc(1, sizeof *p);
    p->source = strdup("bench-plan");
    p->nsetups = 1;
    p->setups = calloc(1, sizeof *p->setups);
    p->setups[0] = (sl_setup){1, SL_POS_HFS};
    p->nbeams = 3;
    p->beams = calloc(3, sizeof *p->beams);
    const double gantry[3] = {0, 40, 320};
    for (int i = 0; i < 3; i++) {
        sl_beam *b = &p->beams[i];
        b->number = i + 1;
        b->radiation_type = strdup("ELECTRON");
        b->delivery_type = strdup("TREATMENT");
        b->beam_type = strdup("STATIC");
        b->sad_mm = 1000;
        b->energy_mev = 9 + 3 * i;
        b->gantry_deg = gantry[i];
        b->has_isocenter = true;
        b->isocenter_mm = (sl_vec3){0, -125, 20.0 * i};
        b->ssd_mm = NAN;
        b->setup_number = 1;
        b->applicator.present = true;
        b->applicator.id = strdup("A10");
        b->applicator.opening_mm = b->applicator.opening_x_mm = b->applicator.opening_y_mm = NAN;
        b->nblocks = 1;
        b->blocks = calloc(1, sizeof *b->blocks);
        cutout(&b->blocks[0], vertices, 1.0);
    }
    return p;
}

static long peak_rss_mb(void)
{
    struct rusage ru;
    getrusage(RUSAGE_SELF, &ru);
    return ru.ru_maxrss / 1024;
}

static size_t total_samples(const sl_location *loc)
{
    size_t n = 0;
    for (size_t i = 0; i < loc->norgans; i++)
        n += loc->samples[i].n;
    return n;
}

/* Largest difference between the depths locate gave and the grid walk's. */
static double depth_check(const sl_location *loc, size_t *checked)
{
    double worst = 0;
    *checked = 0;
    for (size_t b = 0; b < loc->nbeams; b++) {
        const sl_beam_place *bp = &loc->beams[b];
        for (size_t o = 0; o < loc->norgans; o++) {
            const sl_organ_samples *s = &loc->samples[o];
            for (size_t i = 0; i < s->n; i++) {
                if (bp->organs[o].flags[i] & SL_SAMPLE_BEHIND_SOURCE)
                    continue;
                double d = sl_location_depth(loc, bp, s->points[i]);
                worst = fmax(worst, fabs(d - bp->organs[o].depth_cm[i]));
                (*checked)++;
            }
        }
    }
    return worst;
}

int main(void)
{
    sl_structure_set *ss = make_structures();
    sl_applicator_size cat = {"A10", false, 10, 10, 100};
    printf("case: %zu ROIs, %zu contour points, 3 beams\n", ss->nrois, total_points);
    int cores = sl_parallel_threads(0);
    for (int pass = 0; pass < 2; pass++) {
        int threads = pass == 0 ? 1 : cores;
        sl_plan *plan = make_plan(200);
        sl_locate_options opt;
        sl_locate_default_options(&opt);
        opt.catalogue = &cat;
        opt.ncatalogue = 1;
        opt.threads = threads;
        sl_location *loc;
        sl_error err = {0};
        double t0 = now();
        if (sl_locate(plan, ss, &opt, &loc, &err) != SL_OK) {
            fprintf(stderr, "locate failed: %s\n", err.msg);
            return 1;
        }
        double t = now() - t0;
        size_t n = total_samples(loc);
        printf("locate, 200-vertex cutouts, %d thread%s: %.3f s wall, %zu organ samples, "
               "%.2f million sample-beams/s\n",
               threads, threads > 1 ? "s" : "", t, n, 3.0 * n / t / 1e6);
        if (pass == 0) {
            size_t checked;
            double worst = depth_check(loc, &checked);
            printf("depths of %zu sample-beams traced again by the grid walk: largest "
                   "difference %.3g cm\n",
                   checked, worst);
        }
        sl_location_free(loc);
        sl_plan_free(plan);
    }
    printf("peak resident memory: %ld MB\n", peak_rss_mb());
    const int sizes[3] = {8, 200, 2000};
    for (int k = 0; k < 3; k++) {
        sl_plan *plan = make_plan(sizes[k]);
        sl_locate_options opt;
        sl_locate_default_options(&opt);
        opt.catalogue = &cat;
        opt.ncatalogue = 1;
        opt.threads = 1;
        sl_location *loc;
        sl_error err = {0};
        double t0 = now();
        if (sl_locate(plan, ss, &opt, &loc, &err) != SL_OK) {
            fprintf(stderr, "locate failed: %s\n", err.msg);
            return 1;
        }
        printf("cutout of %4d vertices: locate %.3f s on one thread\n", sizes[k], now() - t0);
        sl_location_free(loc);
        sl_plan_free(plan);
    }
    sl_structure_set_free(ss);
    return 0;
}
