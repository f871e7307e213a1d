/*
 * One screening as a library call (see screen.h): the stages of the data
 * flow run in order on one plan, and the request's what-ifs are recorded so
 * that no report can show a what-if number as if it were the plan's.
 *
 * Points and landmarks are checked against the action-level table and the
 * structure set before anything is computed, because a typo in a kind or a
 * name would otherwise give an organ no level and so no judgement at all.
 */
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "strayline/machine.h"
#include "strayline/screen.h"
#include "strayline/util.h"

void sl_screen_request_init(sl_screen_request *r)
{
    memset(r, 0, sizeof *r);
    sl_estimate_default_options(&r->estimate);
    sl_locate_default_options(&r->locate);
    sl_patient_init(&r->patient);
}

void sl_screen_free(sl_screen *s)
{
    if (!s)
        return;
    sl_assessments_free(s->as);
    sl_estimate_free(s->est);
    sl_location_free(s->loc);
    sl_structure_set_free(s->ss);
    sl_plan_free(s->plan);
    free(s->catalogue);
    free(s->map);
    for (size_t i = 0; i < s->nnames; i++)
        free(s->names[i]);
    free(s->names);
    free(s->landmark_rois);
    free(s->whatifs);
    free(s->reach);
    free(s);
}

/* The kind a ROI will be judged as: --organ's (the last given), else the
 * name's, as the assessment does. */
static const sl_kind *roi_kind(const sl_screen *s, const sl_levels *levels, const char *name)
{
    const sl_kind *k = sl_levels_match(levels, name);
    for (size_t m = 0; m < s->nmap; m++)
        if (strcmp(s->map[m].roi, name) == 0)
            k = sl_levels_kind(levels, s->map[m].kind);
    return k;
}

/* The reach of each ROI of a kind that a point cannot stand for without
 * one (sl_point_reach): a cardiac device, a fetus. The kind is the one the
 * assessment will give: --organ's, else the name's. */
static sl_status point_reaches(sl_screen *s, const sl_screen_request *req, sl_estimate_options *eo,
                               sl_error *err)
{
    const sl_structure_set *ss = s->ss;
    s->reach = calloc(ss->nrois ? ss->nrois : 1, sizeof *s->reach);
    if (!s->reach)
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    const sl_patient *pt = &req->patient;
    double ga = isfinite(pt->gestational_weeks) ? pt->gestational_weeks
                                                : pt->conception_weeks + 2;
    size_t n = 0;
    for (size_t i = 0; i < ss->nrois; i++) {
        const char *name = ss->rois[i].name;
        /* the last mapping wins (found by an independent review: the first
         * was taken here, and a device mapped twice lost its reach) */
        const sl_kind *k = roi_kind(s, req->levels, name);
        double cm = 0;
        if (k && strcmp(k->kind, "cardiac_device") == 0)
            cm = SL_POINT_REACH_DEVICE_CM;
        else if (k && strcmp(k->kind, "fetus") == 0)
            /* no age given: at term (a fundal height of 40 cm) */
            cm = fmax(SL_POINT_REACH_FETUS_MIN_CM, isfinite(ga) ? ga / 2 : 20);
        if (cm > 0)
            s->reach[n++] = (sl_point_reach){name, cm};
    }
    eo->reach = s->reach;
    eo->nreach = n;
    return SL_OK;
}

static char *keep_name(sl_screen *s, const char *name)
{
    char *copy = strdup(name);
    if (!copy)
        return NULL;
    s->names[s->nnames++] = copy;
    return copy;
}

static sl_whatif *add_whatif(sl_screen *s, sl_whatif_kind kind, const char *roi)
{
    sl_whatif *w = &s->whatifs[s->nwhatifs++];
    w->kind = kind;
    w->roi = roi;
    w->text[0] = '\0';
    return w;
}

/* The what-ifs of a request, in the order the banner lists them. */
static void record_whatifs(sl_screen *s, const sl_screen_request *req)
{
    const sl_estimate_options *e = &req->estimate;
    for (size_t i = 0; i < e->nshields; i++) {
        sl_whatif *w = add_whatif(s, SL_WHATIF_SHIELD, e->shields[i].roi);
        snprintf(w->text, sizeof w->text,
                 "what-if shield over %s: electron transmission %.2f (%.0f %% of the electron "
                 "dose kept); the plan as delivered has no such shield",
                 e->shields[i].roi, e->shields[i].transmission,
                 100 * e->shields[i].transmission);
    }
    if (e->mode == SL_EVAL_POINTS)
        snprintf(add_whatif(s, SL_WHATIF_POINTS, NULL)->text, sizeof s->whatifs[0].text,
                 "measured-points mode: the commissioning points are interpolated instead of "
                 "the fitted curves, for every organ");
    if (!isnan(e->reference_dose_cgy))
        snprintf(add_whatif(s, SL_WHATIF_REFDOSE, NULL)->text, sizeof s->whatifs[0].text,
                 "reference dose given by hand: %.1f cGy per fraction at the central-axis "
                 "maximum for every beam, not monitor units x output",
                 e->reference_dose_cgy);
    if (!isnan(req->locate.depth_cm))
        snprintf(add_whatif(s, SL_WHATIF_DEPTH, NULL)->text, sizeof s->whatifs[0].text,
                 "one depth given by hand for every organ: %.1f cm (the body contour is not "
                 "used for depths)",
                 req->locate.depth_cm);
}

/* What-if: the bolus the plan has, left out of depths. Known only once the
 * fields are placed (which bolus each beam has); without any bolus the
 * option changes nothing and locate's note says so. */
static void record_no_bolus(sl_screen *s)
{
    const sl_location *loc = s->loc;
    if (!loc->depth_from_body)
        return;
    char list[260] = ""; /* room in the banner's line after its words */
    size_t len = 0;
    bool any = false;
    for (size_t b = 0; b < loc->nbeams; b++) {
        const sl_beam_place *bp = &loc->beams[b];
        if (bp->boli_counted || bp->nboli == 0)
            continue;
        any = true;
        for (size_t i = 0; i < bp->nboli && len < sizeof list; i++) {
            int n = snprintf(list + len, sizeof list - len, "%s'%s' (beam %d)", len ? ", " : "",
                             bp->boli[i]->name, bp->beam->number);
            len += n > 0 ? (size_t)n : 0;
        }
    }
    if (!any)
        return;
    if (len >= sizeof list - 1) /* cut: say so, not a name cut short */
        memcpy(list + sizeof list - 5, " ...", 5);
    snprintf(add_whatif(s, SL_WHATIF_NO_BOLUS, NULL)->text, sizeof s->whatifs[0].text,
             "bolus left out of the depths and of the SSD found where the central "
             "axis enters the body: %s; the plan as delivered has it",
             list);
}

/* A point typed in the wrong unit lands somewhere plausible-looking: warn
 * when it lies outside the body contour or far from every ROI of the scan. */
#define POINT_FAR_MM 100.0
static void point_sanity(sl_screen *s, size_t nscan, const sl_screen_request *req)
{
    const sl_location *loc = s->loc;
    for (size_t i = 0; i < req->npoints; i++) {
        const sl_screen_point *p = &req->points[i];
        bool inside_body = false;
        for (size_t o = 0; o < loc->norgans; o++) {
            if (strcmp(loc->rois[o]->name, p->name) != 0 || loc->nbeams == 0)
                continue;
            if (loc->external && loc->beams[0].organs[o].outside_body_fraction > 0)
                sl_notes_add(&s->as->notes,
                             "point '%s' (%.1f, %.1f, %.1f mm) lies outside the body contour: "
                             "check its coordinates and unit",
                             p->name, p->mm.x, p->mm.y, p->mm.z);
            else if (loc->external)
                inside_body = true;
        }
        /* inside the body the point is where a body is: far from every
         * contour's vertices is no sign of a wrong unit there (found by an
         * independent review: a point mid-abdomen drew the warning, which
         * teaches users to ignore it) */
        if (inside_body)
            continue;
        double best = INFINITY;
        for (size_t r = 0; r < nscan; r++) {
            const sl_roi *roi = &s->ss->rois[r];
            for (size_t c = 0; c < roi->ncontours; c++)
                for (size_t k = 0; k < roi->contours[c].npoints; k++) {
                    sl_vec3 q = roi->contours[c].points[k];
                    double dx = q.x - p->mm.x, dy = q.y - p->mm.y, dz = q.z - p->mm.z;
                    best = fmin(best, sqrt(dx * dx + dy * dy + dz * dz));
                }
        }
        if (nscan && best > POINT_FAR_MM)
            sl_notes_add(&s->as->notes,
                         "point '%s' (%.1f, %.1f, %.1f mm) is %.1f cm from the nearest contour "
                         "point of every ROI: check its coordinates and unit, or use --landmark "
                         "for an organ outside the scan",
                         p->name, p->mm.x, p->mm.y, p->mm.z, best / 10);
    }
}

static sl_status check_given(const sl_screen_request *req, const sl_structure_set *ss,
                             sl_error *err)
{
    const char *lv = req->levels_path ? req->levels_path : "the action-level table";
    size_t n = req->npoints + req->nlandmarks;
    for (size_t i = 0; i < n; i++) {
        bool pt = i < req->npoints;
        const char *kind = pt ? req->points[i].kind : req->landmarks[i - req->npoints].kind;
        const char *name = pt ? req->points[i].name : req->landmarks[i - req->npoints].name;
        const char *what = pt ? "--point" : "--landmark";
        if (!sl_levels_kind(req->levels, kind))
            return sl_error_set(err, SL_EUSAGE, "%s '%s': unknown kind '%s' (see %s)", what,
                                name, kind, lv);
        if (sl_structures_find(ss, name))
            return sl_error_set(err, SL_EUSAGE, "%s '%s': a ROI of that name exists already",
                                what, name);
        for (size_t j = 0; j < i; j++) {
            const char *other =
                j < req->npoints ? req->points[j].name : req->landmarks[j - req->npoints].name;
            if (strcmp(other, name) == 0)
                return sl_error_set(err, SL_EUSAGE,
                                    "'%s': two points or landmarks of that name", name);
        }
    }
    for (size_t i = 0; i < req->estimate.nshields; i++)
        if (!sl_structures_find(ss, req->estimate.shields[i].roi))
            return sl_error_set(err, SL_EUSAGE, "--shield '%s': no ROI of that name",
                                req->estimate.shields[i].roi);
    return SL_OK;
}

/* What-if: every fetus again, the given distance toward the head (+z in
 * patient coordinates, whatever the patient position). */
static sl_status add_fetus_copies(sl_screen *s, const sl_screen_request *req, sl_error *err)
{
    double rise = req->patient.fetus_rise_cm;
    size_t n0 = s->ss->nrois;
    for (size_t r = 0; r < n0; r++) {
        const char *name = s->ss->rois[r].name;
        const sl_kind *k = roi_kind(s, req->levels, name);
        const char *why;
        if (!k || strcmp(k->kind, "fetus") != 0 ||
            sl_dose_type_excluded(s->ss->rois[r].type, req->estimate.include_targets, &why))
            continue;
        char buf[400];
        snprintf(buf, sizeof buf, "%s (what-if: %g cm toward the head)", name, rise);
        char *copy = keep_name(s, buf);
        if (!copy)
            return sl_error_set(err, SL_ENOMEM, "out of memory");
        sl_status st = sl_structures_add_shifted(s->ss, name, copy,
                                                 (sl_vec3){0, 0, 10 * rise}, err);
        if (st != SL_OK)
            return st;
        s->map[s->nmap++] = (sl_organ_map){copy, "fetus"};
        sl_whatif *w = add_whatif(s, SL_WHATIF_FETUS_RISE, copy);
        snprintf(w->text, sizeof w->text,
                 "what-if fetus position: '%s' is a copy of '%s' moved %.1f cm toward the head",
                 copy, name, rise);
    }
    return SL_OK;
}

sl_status sl_screen_run(sl_plan *plan, sl_structure_set *ss, const sl_screen_request *req,
                        sl_screen **out, sl_error *err)
{
    *out = NULL;
    sl_screen *s = calloc(1, sizeof *s);
    if (!s) {
        sl_plan_free(plan);
        sl_structure_set_free(ss);
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    }
    s->plan = plan;
    s->ss = ss;
    if (!req->model || !req->levels) {
        sl_screen_free(s);
        return sl_error_set(err, SL_EINTERNAL, "screen: no model or action levels");
    }
    /* fetus copies: at most one per ROI of the scan */
    /* and of each fetus landmark */
    size_t maxmap = req->nmap + req->npoints + 2 * req->nlandmarks + ss->nrois;
    size_t maxwhat = req->estimate.nshields + 5 + ss->nrois + req->nlandmarks;
    s->map = calloc(maxmap ? maxmap : 1, sizeof *s->map);
    s->names = calloc(ss->nrois + req->nlandmarks + 1, sizeof *s->names);
    s->whatifs = calloc(maxwhat, sizeof *s->whatifs);
    s->landmark_rois =
        calloc(req->nlandmarks ? 2 * req->nlandmarks : 1, sizeof *s->landmark_rois);
    sl_status st = SL_OK;
    if (!s->map || !s->names || !s->whatifs || !s->landmark_rois) {
        st = sl_error_set(err, SL_ENOMEM, "out of memory");
        goto fail;
    }
    for (size_t i = 0; i < req->nmap; i++)
        s->map[s->nmap++] = req->map[i];
    record_whatifs(s, req);

    sl_locate_options lopt = req->locate;
    sl_estimate_options eopt = req->estimate;
    if ((st = sl_machine_catalogue(&req->model->machine, &s->catalogue, &lopt.ncatalogue,
                                   err)) != SL_OK ||
        (st = sl_pair_check(plan, ss, req->allow_mismatch, err)) != SL_OK ||
        (st = check_given(req, ss, err)) != SL_OK)
        goto fail;
    size_t nscan = ss->nrois;
    for (size_t i = 0; i < req->npoints; i++) {
        const sl_screen_point *p = &req->points[i];
        if ((st = sl_structures_add_point(ss, p->name, "MARKER", p->mm, err)) != SL_OK)
            goto fail;
        s->map[s->nmap++] = (sl_organ_map){p->name, p->kind};
    }
    if (req->patient.fetus_rise_cm > 0 && (st = add_fetus_copies(s, req, err)) != SL_OK)
        goto fail;
    lopt.catalogue = s->catalogue;
    eopt.model = req->model;
    if ((st = point_reaches(s, req, &eopt, err)) != SL_OK)
        goto fail;
    if ((st = sl_locate(plan, ss, &lopt, &s->loc, err)) != SL_OK)
        goto fail;
    /* an electron field whose central axis misses the body treats no one
     * on this scan: another scan, or an isocentre moved; every organ would
     * be left out as far away or not judged, the plan passed (found by an
     * independent review) */
    for (size_t b = 0; !req->allow_mismatch && s->loc->depth_from_body && b < s->loc->nbeams;
         b++) {
        const sl_beam_place *bp = &s->loc->beams[b];
        if (!bp->entry_found) {
            st = sl_error_set(err, SL_EINPUT,
                              "%s: beam %d: its central axis misses the body contour of %s: "
                              "plan and structure set do not fit together (another scan, or "
                              "the isocentre moved); check them, or give --allow-mismatch to "
                              "go on",
                              plan->source, bp->beam->number, ss->source);
            goto fail;
        }
    }
    record_no_bolus(s);
    if ((st = sl_estimate_doses(plan, ss, s->loc, &eopt, &s->est, err)) != SL_OK)
        goto fail;
    size_t nlm = 0;
    for (size_t i = 0; i < req->nlandmarks; i++) {
        const sl_screen_landmark *l = &req->landmarks[i];
        sl_roi *roi = &s->landmark_rois[nlm++];
        roi->number = -1;
        roi->name = (char *)l->name;
        roi->type = "MARKER";
        if ((st = sl_estimate_add_landmark(s->est, roi, l->distance_cm, l->depth_cm, err)) !=
            SL_OK)
            goto fail;
        s->map[s->nmap++] = (sl_organ_map){l->name, l->kind};
        /* a fetus measured on the patient risen toward the head: which way
         * the head lies from the field a distance does not say, so the copy
         * is taken that much nearer the field (found by an independent
         * review: the option was silently left out for a landmark) */
        double rise = req->patient.fetus_rise_cm;
        if (!(rise > 0) || strcmp(l->kind, "fetus") != 0)
            continue;
        char buf[400];
        snprintf(buf, sizeof buf, "%s (what-if: %g cm nearer the field)", l->name, rise);
        sl_roi *copy = &s->landmark_rois[nlm++];
        copy->number = -1;
        copy->name = keep_name(s, buf);
        copy->type = "MARKER";
        if (!copy->name) {
            st = sl_error_set(err, SL_ENOMEM, "out of memory");
            goto fail;
        }
        if ((st = sl_estimate_add_landmark(s->est, copy, fmax(l->distance_cm - rise, 0),
                                           l->depth_cm, err)) != SL_OK)
            goto fail;
        s->map[s->nmap++] = (sl_organ_map){copy->name, "fetus"};
        sl_whatif *w = add_whatif(s, SL_WHATIF_FETUS_RISE, copy->name);
        snprintf(w->text, sizeof w->text,
                 "what-if fetus position: '%s' is a copy of the landmark '%s' taken %.1f cm "
                 "nearer the field (a distance measured on the patient does not say where the "
                 "head lies)",
                 copy->name, l->name, rise);
    }
    sl_patient patient = req->patient;
    for (size_t i = 0; i < req->npoints; i++)
        if (strcmp(req->points[i].kind, "cardiac_device") == 0)
            patient.device_asked = true;
    for (size_t i = 0; i < req->nlandmarks; i++)
        if (strcmp(req->landmarks[i].kind, "cardiac_device") == 0)
            patient.device_asked = true;
    if ((st = sl_assess_with(req->levels, s->est, &patient, s->map, s->nmap, req->others,
                             req->nothers, &s->as, err)) != SL_OK)
        goto fail;
    point_sanity(s, nscan, req);
    *out = s;
    return SL_OK;
fail:
    sl_screen_free(s);
    return st;
}

const sl_whatif *sl_screen_whatif_for(const sl_screen *s, const char *roi)
{
    for (size_t i = 0; i < s->nwhatifs; i++)
        if (!s->whatifs[i].roi || (roi && strcmp(s->whatifs[i].roi, roi) == 0))
            return &s->whatifs[i];
    return NULL;
}
