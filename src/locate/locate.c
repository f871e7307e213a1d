/*
 * The placement stage (see include/strayline/locate.h).
 *
 * Order of work: sample every organ once (beam-independent, in patient
 * coordinates; the body's slab stack is built in the same parallel loop),
 * then for each beam build its frame and field outline, project
 * all samples to find the region the outline index must cover, index it,
 * index the body and the beam's bolus for rays from its source (fans,
 * surface.h: the grid walk's depths at a third of its cost), and place the
 * samples in chunks spread over the cores. Then each organ's
 * outline is searched between its outline samples near the field (below),
 * and the organ summarised, one organ a task: a summary reads its organ's
 * samples in order, so it does not depend on how the chunks were scheduled.
 */
#include "bolus.h"
#include "strayline/locate.h"
#include "strayline/parallel.h"
#include "strayline/slices.h"
#include "strayline/surface.h"

#include <float.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#define CHUNK 2048
#define OBLIQUITY_BASE_CM 1.0 /* half-width of the surface patch that gives the normal */

void sl_locate_default_options(sl_locate_options *o)
{
    memset(o, 0, sizeof *o);
    o->depth_cm = NAN;
    sl_sampling_default_options(&o->sampling);
}

bool sl_organ_in_field(const sl_organ_place *p)
{
    return p->placed > 0 && (p->in_field_fraction > 0 || p->min_distance_cm < SL_IN_FIELD_MARGIN_CM);
}

static void organ_place_free(sl_organ_place *p)
{
    free(p->distance_cm);
    free(p->app_distance_cm);
    free(p->depth_cm);
    free(p->flags);
}

void sl_location_free(sl_location *loc)
{
    if (!loc)
        return;
    for (size_t b = 0; b < loc->nbeams; b++) {
        sl_beam_place *bp = &loc->beams[b];
        for (size_t i = 0; bp->organs && i < loc->norgans; i++)
            organ_place_free(&bp->organs[i]);
        free(bp->organs);
        sl_field_free(&bp->field);
        /* boli and parts: sl_locate_bolus_free */
        sl_notes_free(&bp->notes);
    }
    sl_locate_bolus_free(loc);
    free(loc->beams);
    for (size_t i = 0; loc->samples && i < loc->norgans; i++)
        sl_organ_samples_free(&loc->samples[i]);
    free(loc->samples);
    free(loc->rois);
    free(loc->skipped);
    sl_notes_free(&loc->notes);
    free(loc);
}

/* ---------------------------------------------------------- sampling -- */

typedef struct sample_job {
    sl_location *loc;
    const char *file;
    const sl_sampling_options *opt;
    sl_status *status;
    sl_error *errors;
    /* the body's slab stack, built as one more task of the same loop (it
     * does not depend on the samples); NULL when depths do not come from
     * the body */
    sl_slice_stack *stack;
    sl_status stack_status;
    sl_error stack_error;
} sample_job;

/* Task 0 builds the body's stack when there is one: the longest single
 * task, started first so that it overlaps the organs' sampling instead of
 * running alone after it. */
static void sample_task(size_t t, void *ctx)
{
    sample_job *j = ctx;
    if (j->stack) {
        if (t == 0) {
            j->stack_status = sl_slices_build(j->loc->external, j->file,
                                              j->loc->slice_spacing_cm, j->stack,
                                              &j->stack_error);
            return;
        }
        t--;
    }
    j->status[t] = sl_sample_roi(j->loc->rois[t], j->file, j->opt, &j->loc->samples[t],
                                 &j->errors[t]);
}

/* --------------------------------------------------------- placement -- */

typedef struct place_job {
    sl_location *loc;
    sl_beam_place *bp;
    const sl_body *body;
    size_t ntasks;
    size_t *task_organ;
    size_t *task_first;
    const sl_body_fan *const *fans; /* the depth solids indexed for this beam; NULL: trace */
    size_t nfans;
} place_job;

static void place_task(size_t t, void *ctx)
{
    place_job *j = ctx;
    size_t o = j->task_organ[t], first = j->task_first[t];
    const sl_organ_samples *s = &j->loc->samples[o];
    sl_organ_place *p = &j->bp->organs[o];
    size_t last = first + CHUNK < s->n ? first + CHUNK : s->n;
    const sl_frame *f = &j->bp->frame;
    for (size_t i = first; i < last; i++) {
        sl_vec3 b = sl_frame_to_bld(f, s->points[i]);
        sl_vec2 uv;
        double scale;
        unsigned char flags = 0;
        if (!sl_frame_project(f, b, &uv, &scale)) {
            p->flags[i] = SL_SAMPLE_BEHIND_SOURCE;
            p->distance_cm[i] = p->app_distance_cm[i] = p->depth_cm[i] = NAN;
            continue;
        }
        p->distance_cm[i] = scale * sl_field_distance(&j->bp->field, uv);
        p->app_distance_cm[i] = j->bp->field.applicator
                                    ? scale * sl_outline_distance(j->bp->field.applicator, uv)
                                    : NAN;
        if (j->body) {
            p->depth_cm[i] = j->fans ? sl_fans_path(j->fans, j->nfans, s->points[i], NULL)
                                     : sl_location_depth(j->loc, j->bp, s->points[i]);
            if (!sl_body_contains(j->body, s->points[i]))
                flags |= SL_SAMPLE_OUTSIDE_BODY;
        } else {
            p->depth_cm[i] = j->loc->depth_cm;
        }
        p->flags[i] = flags;
    }
}

/* The bounds of one chunk's projections on the isocentric plane, for the
 * region the outline index must cover. Comparisons, not fmin/fmax calls:
 * projections of finite points are finite, and the bounds only size the
 * index (its distances are exact wherever it is built). */
typedef struct bounds_job {
    const sl_location *loc;
    const sl_beam_place *bp;
    const size_t *task_organ, *task_first;
    sl_vec2 *lo, *hi; /* per chunk */
} bounds_job;

static void bounds_task(size_t t, void *ctx)
{
    bounds_job *j = ctx;
    const sl_organ_samples *s = &j->loc->samples[j->task_organ[t]];
    size_t first = j->task_first[t];
    size_t last = first + CHUNK < s->n ? first + CHUNK : s->n;
    sl_vec2 lo = {DBL_MAX, DBL_MAX}, hi = {-DBL_MAX, -DBL_MAX};
    for (size_t i = first; i < last; i++) {
        sl_vec2 uv;
        double scale;
        if (sl_frame_project(&j->bp->frame, sl_frame_to_bld(&j->bp->frame, s->points[i]), &uv,
                             &scale)) {
            lo.x = uv.x < lo.x ? uv.x : lo.x;
            lo.y = uv.y < lo.y ? uv.y : lo.y;
            hi.x = uv.x > hi.x ? uv.x : hi.x;
            hi.y = uv.y > hi.y ? uv.y : hi.y;
        }
    }
    j->lo[t] = lo;
    j->hi[t] = hi;
}

/* ----------------------------------------------- outline refinement -- */

/* The outline samples lie on the contours, but the outline's point nearest
 * the field edge can fall between two of them (a field corner facing the
 * middle of a chord). Every outline chord that could hold a point nearer
 * than the nearest sample found is searched: a scan of OUTLINE_SCAN points,
 * then a golden-section search around the best of them. The least distance
 * found on any of them goes to its chord's end nearer that point (when it
 * is less than that end's own), so the organ's minimum
 * distance, and the dose of its nearest sample, are those of the outline.
 * A chord end moves the signed distance by at most its offset times the
 * divergence factor, a little over 1: the 0.6 below keeps a margin. */
#define OUTLINE_SCAN 16
#define OUTLINE_GOLDEN 40

static double field_distance(const sl_beam_place *bp, sl_vec3 q, bool *ok)
{
    sl_vec2 uv;
    double scale;
    *ok = sl_frame_project(&bp->frame, sl_frame_to_bld(&bp->frame, q), &uv, &scale);
    return *ok ? scale * sl_field_distance(&bp->field, uv) : INFINITY;
}

static sl_vec3 lerp3(sl_vec3 a, sl_vec3 b, double t)
{
    return (sl_vec3){a.x + t * (b.x - a.x), a.y + t * (b.y - a.y), a.z + t * (b.z - a.z)};
}

/* Least distance along chord ab (ends excluded) and its parameter. */
static double chord_minimum(const sl_beam_place *bp, sl_vec3 a, sl_vec3 b, double *t_out)
{
    *t_out = 0;
    double best = INFINITY, tb = 0;
    int ib = 0;
    for (int i = 1; i < OUTLINE_SCAN; i++) {
        bool ok;
        double t = (double)i / OUTLINE_SCAN;
        double d = field_distance(bp, lerp3(a, b, t), &ok);
        if (d < best) {
            best = d;
            tb = t;
            ib = i;
        }
    }
    if (!isfinite(best))
        return INFINITY;
    const double gr = 0.5 * (sqrt(5.0) - 1);
    double lo = (double)(ib - 1) / OUTLINE_SCAN, hi = (double)(ib + 1) / OUTLINE_SCAN;
    double x1 = hi - gr * (hi - lo), x2 = lo + gr * (hi - lo);
    bool ok1, ok2;
    double f1 = field_distance(bp, lerp3(a, b, x1), &ok1);
    double f2 = field_distance(bp, lerp3(a, b, x2), &ok2);
    for (int k = 0; k < OUTLINE_GOLDEN; k++) {
        if (f1 < f2) {
            hi = x2;
            x2 = x1;
            f2 = f1;
            x1 = hi - gr * (hi - lo);
            f1 = field_distance(bp, lerp3(a, b, x1), &ok1);
        } else {
            lo = x1;
            x1 = x2;
            f1 = f2;
            x2 = lo + gr * (hi - lo);
            f2 = field_distance(bp, lerp3(a, b, x2), &ok2);
        }
    }
    if (f1 < best) {
        best = f1;
        tb = x1;
    }
    if (f2 < best) {
        best = f2;
        tb = x2;
    }
    *t_out = tb;
    return best;
}

typedef struct refine_job {
    sl_location *loc;
    sl_beam_place *bp;
} refine_job;

static void summarise(const sl_organ_samples *s, sl_organ_place *p);

static void refine_organ(refine_job *j, size_t o)
{
    const sl_organ_samples *s = &j->loc->samples[o];
    sl_organ_place *p = &j->bp->organs[o];
    if (!s->n_outline)
        return;
    double m = INFINITY;
    for (size_t i = 0; i < s->n; i++)
        if (!(p->flags[i] & SL_SAMPLE_BEHIND_SOURCE))
            m = fmin(m, p->distance_cm[i]);
    if (!isfinite(m))
        return;
    size_t base = s->n - s->n_outline;
    /* each chord's least distance is written after all are searched, so
     * that the candidates do not depend on the order of the search */
    double best = INFINITY;
    size_t best_i = 0;
    for (size_t l = 0; l < s->noutline_loops; l++) {
        size_t first = s->outline_loop_first[l], end = s->outline_loop_first[l + 1];
        if (end - first < 2)
            continue;
        for (size_t k = first; k < end; k++) {
            size_t ia = base + k, ib = base + (k + 1 < end ? k + 1 : first);
            if ((p->flags[ia] | p->flags[ib]) & SL_SAMPLE_BEHIND_SOURCE)
                continue;
            sl_vec3 a = s->points[ia], b = s->points[ib];
            double len = sqrt((b.x - a.x) * (b.x - a.x) + (b.y - a.y) * (b.y - a.y) +
                              (b.z - a.z) * (b.z - a.z));
            if (!(fmin(p->distance_cm[ia], p->distance_cm[ib]) <= m + 0.6 * len))
                continue;
            double t = 0;
            double d = chord_minimum(j->bp, a, b, &t);
            if (d < best) {
                best = d;
                best_i = t < 0.5 ? ia : ib;
            }
        }
    }
    if (best < p->distance_cm[best_i])
        p->distance_cm[best_i] = best;
}

/* An organ's summary needs only its own refined samples: it is made on the
 * same thread, not in a pass over every sample on one thread after. */
static void refine_task(size_t o, void *ctx)
{
    refine_job *j = ctx;
    refine_organ(j, o);
    summarise(&j->loc->samples[o], &j->bp->organs[o]);
}

static void summarise(const sl_organ_samples *s, sl_organ_place *p)
{
    double vsum = 0, dsum = 0, vin = 0, vout = 0;
    p->min_distance_cm = p->min_app_distance_cm = p->min_depth_cm = INFINITY;
    p->max_distance_cm = p->max_depth_cm = -INFINITY;
    p->placed = 0;
    p->behind_source = 0;
    for (size_t i = 0; i < s->n; i++) {
        if (p->flags[i] & SL_SAMPLE_BEHIND_SOURCE) {
            p->behind_source++;
            continue;
        }
        /* points carry no volume: weigh them equally */
        double w = s->is_point ? 1.0 : s->volume_cc[i];
        double d = p->distance_cm[i];
        if (p->placed == 0 || d < p->min_distance_cm) {
            p->min_distance_cm = d;
            p->nearest = i;
        }
        p->placed++;
        p->max_distance_cm = fmax(p->max_distance_cm, d);
        p->min_app_distance_cm = fmin(p->min_app_distance_cm, p->app_distance_cm[i]);
        p->min_depth_cm = fmin(p->min_depth_cm, p->depth_cm[i]);
        p->max_depth_cm = fmax(p->max_depth_cm, p->depth_cm[i]);
        vsum += w;
        dsum += w * d;
        if (d < 0)
            vin += w;
        if (p->flags[i] & SL_SAMPLE_OUTSIDE_BODY)
            vout += w;
    }
    if (p->placed == 0 || !(vsum > 0)) {
        p->min_distance_cm = p->mean_distance_cm = p->max_distance_cm = NAN;
        p->min_app_distance_cm = p->min_depth_cm = p->max_depth_cm = NAN;
        p->in_field_fraction = p->outside_body_fraction = NAN;
        return;
    }
    if (!isfinite(p->min_app_distance_cm))
        p->min_app_distance_cm = NAN;
    p->mean_distance_cm = dsum / vsum;
    p->in_field_fraction = vin / vsum;
    p->outside_body_fraction = vout / vsum;
}

/* Entry of the ray from the source through iso-plane point (u, v) into the
 * body or the beam's bolus on it. */
static bool ray_entry(const sl_beam_place *bp, double u, double v, sl_vec3 *entry, double *dist)
{
    const sl_frame *f = &bp->frame;
    sl_vec3 src = sl_frame_source(f);
    sl_vec3 iso_pt = sl_frame_iso_plane_point(f, u, v);
    sl_vec3 far = {src.x + 3 * (iso_pt.x - src.x), src.y + 3 * (iso_pt.y - src.y),
                   src.z + 3 * (iso_pt.z - src.z)};
    double t;
    sl_bodies_path((const sl_body *const *)bp->parts, bp->nparts, src, far, &t);
    if (isnan(t))
        return false;
    *entry = (sl_vec3){src.x + t * (far.x - src.x), src.y + t * (far.y - src.y),
                       src.z + t * (far.z - src.z)};
    double dx = entry->x - src.x, dy = entry->y - src.y, dz = entry->z - src.z;
    *dist = sqrt(dx * dx + dy * dy + dz * dz);
    return true;
}

static void central_axis(sl_beam_place *bp, const char *file)
{
    bp->ssd_found_cm = NAN;
    bp->obliquity_deg = NAN;
    bp->normal_bld = (sl_vec3){NAN, NAN, NAN};
    const sl_frame *f = &bp->frame;
    double dist;
    if (!ray_entry(bp, 0, 0, &bp->entry_cm, &dist)) {
        sl_notes_add(&bp->notes, "%s: beam %d: the central axis does not enter the body",
                     file, bp->beam->number);
        return;
    }
    bp->entry_found = true;
    bp->ssd_found_cm = dist;
    if (isfinite(bp->ssd_plan_cm) && fabs(dist - bp->ssd_plan_cm) > SL_SSD_WARN_CM)
        sl_notes_add(&bp->notes,
                     "%s: beam %d: the SSD found on the body contour%s is %.1f cm, the plan "
                     "says %.1f cm (more than %.0f cm apart)",
                     file, bp->beam->number, bp->nparts > 1 ? " with its bolus" : "", dist, bp->ssd_plan_cm, SL_SSD_WARN_CM);
    sl_vec3 e[4];
    const double h = OBLIQUITY_BASE_CM;
    const double uv[4][2] = {{h, 0}, {-h, 0}, {0, h}, {0, -h}};
    for (int k = 0; k < 4; k++) {
        if (!ray_entry(bp, uv[k][0], uv[k][1], &e[k], &dist)) {
            sl_notes_add(&bp->notes,
                         "%s: beam %d: the body surface near the central axis is too small to "
                         "find its obliquity",
                         file, bp->beam->number);
            return;
        }
    }
    double t1[3] = {e[0].x - e[1].x, e[0].y - e[1].y, e[0].z - e[1].z};
    double t2[3] = {e[2].x - e[3].x, e[2].y - e[3].y, e[2].z - e[3].z};
    double n[3] = {t1[1] * t2[2] - t1[2] * t2[1], t1[2] * t2[0] - t1[0] * t2[2],
                   t1[0] * t2[1] - t1[1] * t2[0]};
    double nn = sqrt(n[0] * n[0] + n[1] * n[1] + n[2] * n[2]);
    if (!(nn > 0))
        return;
    sl_vec3 d = sl_frame_direction(f);
    double c = fabs(n[0] * d.x + n[1] * d.y + n[2] * d.z) / nn;
    bp->obliquity_deg = acos(fmin(1.0, c)) * 180.0 / M_PI;
    /* the normal in the beam's frame, turned toward the source (+Z) */
    sl_vec3 nb = {0, 0, 0};
    double *nbv[3] = {&nb.x, &nb.y, &nb.z};
    for (int i = 0; i < 3; i++)
        *nbv[i] = (f->r[i][0] * n[0] + f->r[i][1] * n[1] + f->r[i][2] * n[2]) / nn;
    if (nb.z < 0)
        nb = (sl_vec3){-nb.x, -nb.y, -nb.z};
    bp->normal_bld = nb;
}

double sl_beam_tilt_toward(const sl_beam_place *bp, double x, double y)
{
    const sl_vec3 *n = &bp->normal_bld;
    if (!isfinite(bp->obliquity_deg) || !isfinite(n->z))
        return NAN;
    double r = hypot(x, y);
    if (!(r > 0) || !(n->z > 0))
        return 0;
    return atan2((n->x * x + n->y * y) / r, n->z) * 180.0 / M_PI;
}

/* Depths set by option: a bolus in the plan plays no part; say so. */
static void bolus_unused_note(const sl_plan *plan, const sl_structure_set *ss, sl_location *loc)
{
    bool any = false;
    for (size_t b = 0; b < plan->nbeams; b++)
        any = any || plan->beams[b].nboli > 0;
    for (size_t i = 0; i < ss->nrois; i++)
        any = any || (ss->rois[i].type && strcmp(ss->rois[i].type, "BOLUS") == 0);
    if (any)
        sl_notes_add(&loc->notes, "the plan has bolus, but every depth is set by option: the "
                                  "bolus is not counted");
}

/* The beam's depth solids (the body and its bolus) indexed for rays from
 * its source (surface.h): the same depths as tracing, several times
 * faster. *fans stays NULL when a solid cannot be indexed from this source
 * (a beam along the patient's axis): the samples are traced then. */
static void fans_free(sl_body_fan **f, size_t n)
{
    for (size_t i = 0; f && i < n; i++)
        sl_body_fan_free(f[i]);
    free(f);
}

static sl_status depth_fans(const sl_beam_place *bp, int threads, sl_body_fan ***fans,
                            sl_error *err)
{
    *fans = NULL;
    sl_body_fan **f = calloc(bp->nparts ? bp->nparts : 1, sizeof *f);
    if (!f)
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    sl_vec3 src = sl_frame_source(&bp->frame);
    for (size_t k = 0; k < bp->nparts; k++) {
        sl_status st = sl_body_fan_create(bp->parts[k], src, threads, &f[k], err);
        if (st != SL_OK || !f[k]) {
            fans_free(f, k);
            return st;
        }
    }
    *fans = f;
    return SL_OK;
}

/* The field's outline indexes and the beam's depth fans need nothing of
 * each other, so they are built side by side: the indexes on one thread
 * (5 ms for a 200-vertex cutout on the benchmark's case, which kept a core
 * idle once a beam) while the fans take the cores. */
typedef struct prep_job {
    sl_beam_place *bp;
    const sl_body *body;
    sl_vec2 lo, hi;
    int threads;
    sl_body_fan **fans;
    sl_status st[2];
    sl_error err[2];
} prep_job;

static void prep_task(size_t t, void *ctx)
{
    prep_job *j = ctx;
    if (t == 0) {
        j->st[0] = sl_outline_index(j->bp->field.edge, j->lo, j->hi, &j->err[0]);
        if (j->st[0] == SL_OK && j->bp->field.applicator)
            j->st[0] = sl_outline_index(j->bp->field.applicator, j->lo, j->hi, &j->err[0]);
    } else if (j->body) {
        j->st[1] = depth_fans(j->bp, j->threads, &j->fans, &j->err[1]);
    }
}

static sl_status place_beam(sl_location *loc, const sl_plan *plan, const sl_beam *beam,
                            const sl_body *body, const sl_locate_options *opt, sl_beam_place *bp,
                            sl_error *err)
{
    bp->beam = beam;
    bp->ssd_plan_cm = isfinite(beam->ssd_mm) ? beam->ssd_mm * 0.1 : NAN;
    /* unknown until the central axis is traced through a body */
    bp->ssd_found_cm = NAN;
    bp->obliquity_deg = NAN;
    bp->normal_bld = (sl_vec3){NAN, NAN, NAN};
    sl_status st = sl_plan_beam_position(plan, beam, &bp->position, err);
    if (st == SL_OK)
        st = sl_frame_from_beam(&bp->frame, plan, beam, err);
    if (st == SL_OK)
        st = sl_field_build(plan, beam, opt->catalogue, opt->ncatalogue, &bp->field, err);
    if (st != SL_OK)
        return st;
    if (bp->field.applicator_disagrees)
        sl_notes_add(&bp->notes,
                     "%s: beam %d: the plan's applicator opening (%.1f x %.1f cm) and the model "
                     "file's size of applicator '%s' (%.1f x %.1f cm at the isocentre) disagree: "
                     "distances are measured from the larger of the two on each axis; check the "
                     "applicator",
                     plan->source, beam->number, bp->field.plan_opening_cm[0],
                     bp->field.plan_opening_cm[1], beam->applicator.id,
                     bp->field.model_opening_cm[0], bp->field.model_opening_cm[1]);
    if (bp->field.outer)
        sl_notes_add(&bp->notes,
                     "%s: beam %d: a SHIELDING block lies inside the field opening: points under "
                     "it are taken as in the field, where the planning system's dose applies "
                     "(the measured profiles say nothing about the dose under a block with the "
                     "field on every side)",
                     plan->source, beam->number);
    if (!bp->field.applicator)
        sl_notes_add(&bp->notes,
                     "%s: beam %d: the applicator opening is unknown (no Applicator Geometry and "
                     "no catalogue entry): distances from the applicator are not given",
                     plan->source, beam->number);
    bp->organs = calloc(loc->norgans ? loc->norgans : 1, sizeof *bp->organs);
    if (!bp->organs)
        return sl_error_set(err, SL_ENOMEM, "out of memory");

    size_t ntasks = 0;
    for (size_t o = 0; o < loc->norgans; o++) {
        const sl_organ_samples *s = &loc->samples[o];
        sl_organ_place *p = &bp->organs[o];
        size_t n = s->n ? s->n : 1;
        p->distance_cm = malloc(n * sizeof *p->distance_cm);
        p->app_distance_cm = malloc(n * sizeof *p->app_distance_cm);
        p->depth_cm = malloc(n * sizeof *p->depth_cm);
        p->flags = calloc(n, 1);
        if (!p->distance_cm || !p->app_distance_cm || !p->depth_cm || !p->flags)
            return sl_error_set(err, SL_ENOMEM, "out of memory");
        ntasks += (s->n + CHUNK - 1) / CHUNK;
    }
    size_t nt = ntasks ? ntasks : 1;
    place_job job = {loc, bp, body, ntasks, malloc(nt * sizeof(size_t)),
                     malloc(nt * sizeof(size_t)), NULL, 0};
    bounds_job bj = {loc, bp, job.task_organ, job.task_first, malloc(nt * sizeof(sl_vec2)),
                     malloc(nt * sizeof(sl_vec2))};
    if (!job.task_organ || !job.task_first || !bj.lo || !bj.hi) {
        free(job.task_organ);
        free(job.task_first);
        free(bj.lo);
        free(bj.hi);
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    }
    size_t t = 0;
    for (size_t o = 0; o < loc->norgans; o++) {
        for (size_t first = 0; first < loc->samples[o].n; first += CHUNK) {
            job.task_organ[t] = o;
            job.task_first[t] = first;
            t++;
        }
    }

    /* where will the queries fall on the isocentric plane? Each chunk's
     * bounds on the cores, then the least and greatest of them in order;
     * not where neither outline has edges enough to be split (a cutout of
     * a dozen points: one leaf, the same distances), which projected every
     * sample for nothing (1 % of a scan) */
    bool split = sl_outline_index_splits(bp->field.edge) ||
                 (bp->field.applicator && sl_outline_index_splits(bp->field.applicator));
    if (split)
        sl_parallel_for(ntasks, sl_parallel_threads(opt->threads), bounds_task, &bj);
    sl_vec2 lo = {DBL_MAX, DBL_MAX}, hi = {-DBL_MAX, -DBL_MAX};
    for (t = 0; split && t < ntasks; t++) {
        lo.x = bj.lo[t].x < lo.x ? bj.lo[t].x : lo.x;
        lo.y = bj.lo[t].y < lo.y ? bj.lo[t].y : lo.y;
        hi.x = bj.hi[t].x > hi.x ? bj.hi[t].x : hi.x;
        hi.y = bj.hi[t].y > hi.y ? bj.hi[t].y : hi.y;
    }
    free(bj.lo);
    free(bj.hi);
    if (lo.x > hi.x)
        lo = hi = (sl_vec2){0, 0};
    /* far-off samples (tens of cm) need no fine index: clamp the indexed
     * region to 60 cm around the field; beyond it every edge is scanned */
    const double reach = 60.0;
    lo.x = fmax(lo.x, -reach);
    lo.y = fmax(lo.y, -reach);
    hi.x = fmin(hi.x, reach);
    hi.y = fmin(hi.y, reach);
    prep_job pj = {.bp = bp, .body = body, .lo = lo, .hi = hi, .threads = opt->threads,
                   .st = {SL_OK, SL_OK}};
    sl_parallel_for(2, sl_parallel_threads(opt->threads) > 1 ? 2 : 1, prep_task, &pj);
    sl_body_fan **fans = pj.fans;
    /* the index's error first, as when they were built in turn */
    st = pj.st[0] != SL_OK ? pj.st[0] : pj.st[1];
    if (st == SL_OK) {
        job.fans = (const sl_body_fan *const *)fans;
        job.nfans = fans ? bp->nparts : 0;
        sl_parallel_for(ntasks, sl_parallel_threads(opt->threads), place_task, &job);
    } else if (err) {
        *err = pj.st[0] != SL_OK ? pj.err[0] : pj.err[1];
    }
    free(job.task_organ);
    free(job.task_first);
    fans_free(fans, bp->nparts);
    if (st != SL_OK)
        return st;
    refine_job rj = {loc, bp};
    sl_parallel_for(loc->norgans, sl_parallel_threads(opt->threads), refine_task, &rj);
    for (size_t o = 0; body && o < loc->norgans; o++)
        for (size_t i = 0; i < loc->samples[o].n; i++)
            if (isnan(bp->organs[o].depth_cm[i]) &&
                !(bp->organs[o].flags[i] & SL_SAMPLE_BEHIND_SOURCE))
                return sl_error_set(err, SL_ENOMEM, "out of memory tracing depths through the "
                                                    "body contour");
    for (size_t o = 0; o < loc->norgans; o++) {
        if (bp->organs[o].behind_source)
            sl_notes_add(&bp->notes,
                         "%s: beam %d: ROI '%s': %zu samples lie at or behind the source plane "
                         "and are not placed",
                         plan->source, beam->number, loc->rois[o]->name,
                         bp->organs[o].behind_source);
        /* bolus lies on the skin, outside the body contour by nature */
        const char *type = loc->rois[o]->type;
        if (bp->organs[o].outside_body_fraction >= SL_OUTSIDE_BODY_NOTE &&
            !(type && strcmp(type, "BOLUS") == 0))
            sl_notes_add(&bp->notes,
                         "ROI '%s': %.1f %% of its volume lies outside the body contour",
                         loc->rois[o]->name, 100 * bp->organs[o].outside_body_fraction);
    }
    if (body)
        central_axis(bp, plan->source);
    return SL_OK;
}

sl_status sl_locate(const sl_plan *plan, const sl_structure_set *ss,
                    const sl_locate_options *opt, sl_location **out, sl_error *err)
{
    *out = NULL;
    sl_location *loc = calloc(1, sizeof *loc);
    if (!loc)
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    sl_status st = sl_structures_external(ss, &loc->external, err);
    if (st != SL_OK) {
        sl_location_free(loc);
        return st;
    }
    loc->depth_cm = opt->depth_cm;
    if (!isnan(opt->depth_cm)) {
        if (!(opt->depth_cm >= 0 && opt->depth_cm < 50)) {
            sl_location_free(loc);
            return sl_error_set(err, SL_EUSAGE, "depth %g cm is not a plausible depth",
                                opt->depth_cm);
        }
        loc->depth_from_body = false;
        sl_notes_add(&loc->notes,
                     "every depth is set by option to %.2f cm%s", opt->depth_cm,
                     loc->external ? " (the body contour is not used)"
                                   : " (the structure set has no EXTERNAL ROI)");
    } else if (!loc->external) {
        sl_location_free(loc);
        return sl_error_set(err, SL_EINPUT,
                            "%s: no ROI is typed EXTERNAL (the body): depths are unknown; give a "
                            "depth for every organ with --depth CM",
                            ss->source);
    } else {
        loc->depth_from_body = true;
    }
    loc->slice_spacing_cm = sl_slices_typical_spacing(ss, 0.3);
    sl_sampling_options sopt = opt->sampling;
    sopt.default_thickness_cm = loc->slice_spacing_cm;

    /* organs: every ROI but the body */
    loc->rois = calloc(ss->nrois ? ss->nrois : 1, sizeof *loc->rois);
    loc->samples = calloc(ss->nrois ? ss->nrois : 1, sizeof *loc->samples);
    if (!loc->rois || !loc->samples) {
        sl_location_free(loc);
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    }
    for (size_t i = 0; i < ss->nrois; i++) {
        if (&ss->rois[i] == loc->external && !opt->include_external)
            continue;
        loc->rois[loc->norgans++] = &ss->rois[i];
    }
    int threads = sl_parallel_threads(opt->threads);
    sl_status *sst = calloc(loc->norgans ? loc->norgans : 1, sizeof *sst);
    sl_error *serr = calloc(loc->norgans ? loc->norgans : 1, sizeof *serr);
    if (!sst || !serr) {
        free(sst);
        free(serr);
        sl_location_free(loc);
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    }
    sl_slice_stack stack = {0};
    sample_job sj = {loc, ss->source, &sopt, sst, serr,
                     loc->depth_from_body ? &stack : NULL, SL_OK, {0}};
    sl_parallel_for(loc->norgans + (sj.stack != NULL), threads, sample_task, &sj);
    for (size_t i = 0; i < loc->norgans && st == SL_OK; i++) {
        if (sst[i] != SL_OK) {
            st = sst[i];
            if (err)
                *err = serr[i];
        } else {
            sl_notes_extend(&loc->notes, &loc->samples[i].notes);
        }
    }
    free(sst);
    free(serr);
    if (st != SL_OK) {
        sl_slices_free(&stack);
        sl_location_free(loc);
        return st;
    }

    sl_body *body = NULL;
    if (!loc->depth_from_body)
        bolus_unused_note(plan, ss, loc);
    if (loc->depth_from_body) {
        st = sj.stack_status;
        if (st != SL_OK && err)
            *err = sj.stack_error;
        if (st == SL_OK) {
            char what[256];
            snprintf(what, sizeof what, "%s: EXTERNAL ROI '%s'", ss->source,
                     loc->external->name);
            st = sl_body_create_threads(&stack, what, opt->threads, &body, err);
            sl_slices_free(&stack);
        }
        if (st != SL_OK) {
            sl_location_free(loc);
            return st;
        }
        loc->body = body; /* kept for sl_location_depth */
    }

    loc->beams = calloc(plan->nbeams ? plan->nbeams : 1, sizeof *loc->beams);
    loc->skipped = calloc(plan->nbeams ? plan->nbeams : 1, sizeof *loc->skipped);
    if (!loc->beams || !loc->skipped) {
        sl_location_free(loc);
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    }
    for (size_t b = 0; b < plan->nbeams && st == SL_OK; b++) {
        const sl_beam *beam = &plan->beams[b];
        const char *why = sl_beam_skip_reason(beam);
        if (why) {
            loc->skipped[loc->nskipped++] = (sl_skipped_beam){beam->number, beam->name, why};
            continue;
        }
        sl_beam_place *bp = &loc->beams[loc->nbeams++];
        bp->beam = beam;
        if (body)
            st = sl_locate_bolus(loc, ss, opt, bp, err);
        if (st == SL_OK)
            st = place_beam(loc, plan, beam, body, opt, bp, err);
    }
    if (st == SL_OK && body && opt->no_bolus) {
        bool any = false;
        for (size_t b = 0; b < loc->nbeams; b++)
            any = any || loc->beams[b].nboli > 0;
        if (!any)
            sl_notes_add(&loc->notes, "no beam has bolus: leaving it out by option changes "
                                      "nothing");
    }
    if (st == SL_OK && loc->nbeams == 0)
        st = sl_error_set(err, SL_EINPUT, "%s: no TREATMENT electron beam to place",
                          plan->source);
    if (st != SL_OK) {
        sl_location_free(loc);
        return st;
    }
    *out = loc;
    return SL_OK;
}
