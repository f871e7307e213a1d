/*
 * RT Structure Set data: freeing, lookups, set-level checks, and the check
 * that a plan and a structure set describe the same patient geometry.
 */
#include "strayline/structures.h"
#include "strayline/util.h"

#include <limits.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

static const char *const contour_codes[] = {
    "POINT", "OPEN_PLANAR", "OPEN_NONPLANAR", "CLOSED_PLANAR", "CLOSEDPLANAR_XOR",
};

const char *sl_contour_type_code(sl_contour_type t)
{
    return (unsigned)t < sizeof contour_codes / sizeof *contour_codes ? contour_codes[t] : NULL;
}

bool sl_contour_type_parse(const char *code, sl_contour_type *out)
{
    for (size_t i = 0; i < sizeof contour_codes / sizeof *contour_codes; i++) {
        if (code && strcmp(code, contour_codes[i]) == 0) {
            *out = (sl_contour_type)i;
            return true;
        }
    }
    return false;
}

void sl_structure_set_free(sl_structure_set *ss)
{
    if (!ss)
        return;
    free(ss->source);
    free(ss->sop_instance_uid);
    free(ss->label);
    free(ss->patient_id);
    free(ss->patient_name);
    free(ss->frame_uid);
    for (size_t i = 0; i < ss->nrois; i++) {
        sl_roi *r = &ss->rois[i];
        free(r->name);
        free(r->type);
        free(r->frame_uid);
        for (size_t j = 0; j < r->ncontours; j++)
            free(r->contours[j].points);
        free(r->contours);
    }
    free(ss->rois);
    sl_notes_free(&ss->notes);
    free(ss);
}

size_t sl_roi_point_count(const sl_roi *roi)
{
    size_t n = 0;
    for (size_t i = 0; i < roi->ncontours; i++)
        n += roi->contours[i].npoints;
    return n;
}

bool sl_roi_z_range(const sl_roi *roi, double *zmin, double *zmax)
{
    bool any = false;
    double lo = INFINITY, hi = -INFINITY;
    for (size_t i = 0; i < roi->ncontours; i++) {
        for (size_t k = 0; k < roi->contours[i].npoints; k++) {
            double z = roi->contours[i].points[k].z;
            lo = fmin(lo, z);
            hi = fmax(hi, z);
            any = true;
        }
    }
    if (any) {
        *zmin = lo;
        *zmax = hi;
    }
    return any;
}

const sl_roi *sl_structures_find(const sl_structure_set *ss, const char *name)
{
    for (size_t i = 0; i < ss->nrois; i++) {
        if (ss->rois[i].name && strcmp(ss->rois[i].name, name) == 0)
            return &ss->rois[i];
    }
    return NULL;
}

sl_status sl_structures_external(const sl_structure_set *ss, const sl_roi **out, sl_error *err)
{
    *out = NULL;
    for (size_t i = 0; i < ss->nrois; i++) {
        const sl_roi *r = &ss->rois[i];
        if (r->type && strcmp(r->type, "EXTERNAL") == 0) {
            if (*out)
                return sl_error_set(err, SL_EINPUT,
                                    "%s: RTROIInterpretedType (3006,00A4): two ROIs are typed "
                                    "EXTERNAL ('%s' and '%s'); the body must be one ROI",
                                    ss->source, (*out)->name, r->name);
            *out = r;
        }
    }
    return SL_OK;
}

static int cmp_roi_number(const void *a, const void *b)
{
    int x = (*(const sl_roi *const *)a)->number, y = (*(const sl_roi *const *)b)->number;
    return (x > y) - (x < y);
}

static int cmp_roi_name(const void *a, const void *b)
{
    const sl_roi *x = *(const sl_roi *const *)a, *y = *(const sl_roi *const *)b;
    int c = strcmp(x->name, y->name);
    return c ? c : (x->number > y->number) - (x->number < y->number);
}

static int cmp_contour(const void *a, const void *b)
{
    const sl_contour *x = *(const sl_contour *const *)a, *y = *(const sl_contour *const *)b;
    if (x->npoints != y->npoints)
        return x->npoints < y->npoints ? -1 : 1;
    if (x->type != y->type)
        return x->type < y->type ? -1 : 1;
    return memcmp(x->points, y->points, x->npoints * sizeof *x->points);
}

/* Contours repeated exactly (same type and points) within a ROI would count
 * their area twice: keep one of each, and say so. */
static sl_status drop_repeated_contours(sl_structure_set *ss, sl_roi *r, const char *f)
{
    if (r->ncontours < 2)
        return SL_OK;
    sl_contour **v = malloc(r->ncontours * sizeof *v);
    bool *gone = calloc(r->ncontours, sizeof *gone);
    if (!v || !gone) {
        free(v);
        free(gone);
        return SL_ENOMEM;
    }
    for (size_t i = 0; i < r->ncontours; i++)
        v[i] = &r->contours[i];
    qsort(v, r->ncontours, sizeof *v, cmp_contour);
    size_t dropped = 0;
    for (size_t i = 1; i < r->ncontours; i++) {
        if (v[i]->npoints > 0 && cmp_contour(&v[i], &v[i - 1]) == 0) {
            gone[v[i] - r->contours] = true;
            dropped++;
        }
    }
    free(v);
    size_t k = 0;
    for (size_t i = 0; dropped && i < r->ncontours; i++) {
        if (gone[i])
            free(r->contours[i].points);
        else
            r->contours[k++] = r->contours[i];
    }
    free(gone);
    if (!dropped)
        return SL_OK;
    r->ncontours = k;
    return sl_notes_add(&ss->notes,
                        "%s: ROI '%s': %zu contour(s) repeat another exactly on the same slice: "
                        "each is counted once",
                        f, r->name, dropped);
}

/* Duplicate numbers (an error) and names (a note), by sorting: a structure
 * set of tens of thousands of ROIs must not take quadratic time. */
sl_status sl_structure_set_validate(sl_structure_set *ss, sl_error *err)
{
    const char *f = ss->source ? ss->source : "(structure set)";
    const sl_roi **v = malloc((ss->nrois ? ss->nrois : 1) * sizeof *v);
    if (!v)
        return sl_error_set(err, SL_ENOMEM, "%s: out of memory", f);
    for (size_t i = 0; i < ss->nrois; i++)
        v[i] = &ss->rois[i];
    sl_status st = SL_OK;
    qsort(v, ss->nrois, sizeof *v, cmp_roi_number);
    for (size_t i = 1; i < ss->nrois && st == SL_OK; i++) {
        if (v[i]->number == v[i - 1]->number)
            st = sl_error_set(err, SL_EINPUT, "%s: ROINumber (3006,0022): duplicate ROI number %d",
                              f, v[i]->number);
    }
    qsort(v, ss->nrois, sizeof *v, cmp_roi_name);
    for (size_t i = 1; i < ss->nrois && st == SL_OK; i++) {
        if (strcmp(v[i]->name, v[i - 1]->name) == 0 &&
            sl_notes_add(&ss->notes, "%s: two ROIs are named '%s' (numbers %d and %d)", f,
                         v[i]->name, v[i - 1]->number, v[i]->number) != SL_OK)
            st = sl_error_set(err, SL_ENOMEM, "%s: out of memory", f);
    }
    free(v);
    for (size_t i = 0; i < ss->nrois && st == SL_OK; i++) {
        if (drop_repeated_contours(ss, &ss->rois[i], f) != SL_OK)
            st = sl_error_set(err, SL_ENOMEM, "%s: out of memory", f);
    }
    if (st != SL_OK)
        return st;
    const sl_roi *ext;
    return sl_structures_external(ss, &ext, err);
}

static bool same(const char *a, const char *b)
{
    return a && b && strcmp(a, b) == 0;
}

sl_status sl_pair_check(sl_plan *plan, sl_structure_set *ss, bool allow_mismatch, sl_error *err)
{
    char why[SL_ERROR_MSG_MAX] = "";
    if (!plan->structure_set_uid)
        snprintf(why, sizeof why,
                 "%s: the plan names no structure set (ReferencedStructureSetSequence "
                 "(300C,0060) absent); %s is %s",
                 plan->source, ss->source, ss->sop_instance_uid);
    else if (!same(plan->structure_set_uid, ss->sop_instance_uid))
        snprintf(why, sizeof why,
                 "%s: the plan refers to structure set %s but %s is %s: they do not belong "
                 "together",
                 plan->source, plan->structure_set_uid, ss->source, ss->sop_instance_uid);
    else {
        const char *ss_frame = ss->frame_uid;
        if (!ss_frame && ss->nrois > 0)
            ss_frame = ss->rois[0].frame_uid;
        if (plan->frame_uid && ss_frame && !same(plan->frame_uid, ss_frame))
            snprintf(why, sizeof why,
                     "%s: frame of reference %s differs from %s's frame of reference %s",
                     plan->source, plan->frame_uid, ss->source, ss_frame);
        /* every ROI in one frame: the plan's, or without it the structure
         * set's own (coordinates of two frames cannot be combined without
         * a registration, DICOM PS3.3 C.7.4.1; found by an independent
         * review: a lens in another frame was placed when the plan gave
         * none) */
        const char *ref = plan->frame_uid ? plan->frame_uid : ss_frame;
        for (size_t i = 0; !why[0] && ref && i < ss->nrois; i++) {
            const sl_roi *r = &ss->rois[i];
            if (r->frame_uid && !same(r->frame_uid, ref))
                snprintf(why, sizeof why,
                         "%s: ROI '%s' lies in frame of reference %s, not the %s %s",
                         ss->source, r->name, r->frame_uid,
                         plan->frame_uid ? "plan's" : "structure set's", ref);
        }
        /* one patient: a plan and a structure set of one frame but of two
         * patients (a phantom frame reused, a merge gone wrong) are not a
         * pair (found by an independent review) */
        if (!why[0] && plan->patient_id && ss->patient_id && plan->patient_id[0] &&
            ss->patient_id[0] && strcmp(plan->patient_id, ss->patient_id) != 0)
            snprintf(why, sizeof why, "%s: Patient ID (0010,0020) '%s' differs from %s's '%s'",
                     plan->source, plan->patient_id, ss->source, ss->patient_id);
        if (!why[0] && (!plan->frame_uid || !ss_frame) &&
            sl_notes_add(&plan->notes,
                         "the frames of reference were not compared: %s gives no "
                         "FrameOfReferenceUID (0020,0052)",
                         !plan->frame_uid ? plan->source : ss->source) != SL_OK)
            return sl_error_set(err, SL_ENOMEM, "out of memory");
    }
    if (!why[0])
        return SL_OK;
    /* the message names the way on, for the case where the user knows better
     * (a structure set re-exported under a new UID) */
    if (!allow_mismatch)
        return sl_error_set(err, SL_EINPUT,
                            "%s (if they do belong together, --allow-mismatch goes on and every "
                            "report says so)",
                            why);
    if (sl_notes_add(&plan->notes, "MISMATCH ALLOWED BY OPTION: %s", why) != SL_OK ||
        sl_notes_add(&ss->notes, "MISMATCH ALLOWED BY OPTION: %s", why) != SL_OK)
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    return SL_OK;
}

/* A number for a ROI added by the tool: one above the highest in use, or,
 * when that is INT_MAX, the lowest not in use (one of 1 .. nrois + 1 is
 * free). The new ROI is not counted yet (ss->nrois excludes it). */
static int free_roi_number(const sl_structure_set *ss)
{
    long long top = 0;
    for (size_t i = 0; i < ss->nrois; i++)
        top = ss->rois[i].number > top ? ss->rois[i].number : top;
    if (top < INT_MAX)
        return (int)top + 1;
    for (int cand = 1;; cand++) {
        bool used = false;
        for (size_t i = 0; i < ss->nrois && !used; i++)
            used = ss->rois[i].number == cand;
        if (!used)
            return cand;
    }
}

sl_status sl_structures_add_point(sl_structure_set *ss, const char *name, const char *type,
                                  sl_vec3 point_mm, sl_error *err)
{
    if (sl_structures_find(ss, name))
        return sl_error_set(err, SL_EUSAGE, "a ROI named '%s' exists already", name);
    sl_roi *rois = realloc(ss->rois, (ss->nrois + 1) * sizeof *rois);
    if (!rois)
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    ss->rois = rois;
    sl_roi *r = &ss->rois[ss->nrois];
    memset(r, 0, sizeof *r);
    bool ok = true;
    r->number = free_roi_number(ss);
    r->name = sl_strdup(name, &ok);
    r->type = sl_strdup(type, &ok);
    r->contours = calloc(1, sizeof *r->contours);
    if (r->contours)
        r->contours[0].points = malloc(sizeof *r->contours[0].points);
    if (!ok || !r->contours || !r->contours[0].points) {
        free(r->name);
        free(r->type);
        if (r->contours)
            free(r->contours[0].points);
        free(r->contours);
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    }
    r->ncontours = 1;
    r->contours[0].type = SL_CONTOUR_POINT;
    r->contours[0].npoints = 1;
    r->contours[0].points[0] = point_mm;
    ss->nrois++;
    if (sl_notes_add(&ss->notes, "ROI '%s' is a point given on the command line (%.1f, %.1f, "
                                 "%.1f mm)",
                     name, point_mm.x, point_mm.y, point_mm.z) != SL_OK)
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    return SL_OK;
}

sl_status sl_structures_add_shifted(sl_structure_set *ss, const char *src, const char *name,
                                    sl_vec3 shift_mm, sl_error *err)
{
    const sl_roi *from = sl_structures_find(ss, src);
    if (!from)
        return sl_error_set(err, SL_EUSAGE, "no ROI named '%s'", src);
    if (sl_structures_find(ss, name))
        return sl_error_set(err, SL_EUSAGE, "a ROI named '%s' exists already", name);
    size_t idx = (size_t)(from - ss->rois);
    sl_roi *rois = realloc(ss->rois, (ss->nrois + 1) * sizeof *rois);
    if (!rois)
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    ss->rois = rois;
    from = &ss->rois[idx];
    sl_roi *r = &ss->rois[ss->nrois];
    memset(r, 0, sizeof *r);
    bool ok = true;
    r->number = free_roi_number(ss);
    r->name = sl_strdup(name, &ok);
    r->type = from->type ? sl_strdup(from->type, &ok) : NULL;
    r->frame_uid = from->frame_uid ? sl_strdup(from->frame_uid, &ok) : NULL;
    r->has_color = from->has_color;
    memcpy(r->color, from->color, sizeof r->color);
    r->contours = from->ncontours ? calloc(from->ncontours, sizeof *r->contours) : NULL;
    ok = ok && (r->contours || !from->ncontours);
    for (size_t c = 0; ok && c < from->ncontours; c++) {
        const sl_contour *fc = &from->contours[c];
        sl_contour *tc = &r->contours[c];
        tc->type = fc->type;
        tc->points = malloc((fc->npoints ? fc->npoints : 1) * sizeof *tc->points);
        if (!tc->points) {
            ok = false;
            break;
        }
        tc->npoints = fc->npoints;
        r->ncontours = c + 1;
        for (size_t k = 0; k < fc->npoints; k++)
            tc->points[k] = (sl_vec3){fc->points[k].x + shift_mm.x, fc->points[k].y + shift_mm.y,
                                      fc->points[k].z + shift_mm.z};
    }
    ss->nrois++;
    if (!ok)
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    if (sl_notes_add(&ss->notes, "ROI '%s' is a what-if copy of '%s' moved by (%.1f, %.1f, %.1f "
                                 "mm)",
                     name, src, shift_mm.x, shift_mm.y, shift_mm.z) != SL_OK)
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    return SL_OK;
}
