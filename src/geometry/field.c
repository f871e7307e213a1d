/*
 * Field and applicator outlines of a beam (see include/strayline/field.h).
 */
#include "strayline/field.h"

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

const char *sl_field_source_name(sl_field_source s)
{
    switch (s) {
    case SL_FIELD_CUTOUT: return "cutout (APERTURE blocks)";
    case SL_FIELD_PLAN_APPLICATOR: return "applicator opening in the plan";
    case SL_FIELD_CATALOGUE: return "applicator catalogue of the model file";
    case SL_FIELD_LARGER_APPLICATOR:
        return "larger of the plan's applicator opening and the model file's size";
    }
    return "?";
}

void sl_field_free(sl_field *f)
{
    if (!f)
        return;
    sl_outline_free(f->edge);
    sl_outline_free(f->applicator);
    sl_outline_free(f->outer);
    memset(f, 0, sizeof *f);
}

/* The applicator opening at the isocentric plane, from the plan or the
 * catalogue; *out stays NULL when neither knows it. When both know it,
 * the larger of the two on each axis is taken: the model's profiles are
 * measured from the edge of the applicator it lists under that ID, and a
 * smaller opening in the plan would put every organ farther from the edge
 * than the model's distances mean, so lower (found by an independent
 * review: 6 cm in the plan under a 10 cm applicator passed a lens at a
 * third of its dose). Beyond APPLICATOR_AGREE they are said to disagree. */
#define APPLICATOR_AGREE_CM 0.5
#define APPLICATOR_AGREE_REL 0.10

static bool sizes_agree(double a, double b)
{
    return fabs(a - b) <= fmax(APPLICATOR_AGREE_CM, APPLICATOR_AGREE_REL * fmax(a, b));
}

static sl_status applicator_outline(const sl_plan *plan, const sl_beam *beam,
                                    const sl_applicator_size *cat, size_t ncat, sl_field *f,
                                    sl_field_source *src, sl_error *err)
{
    sl_outline **out = &f->applicator;
    *out = NULL;
    const sl_applicator *a = &beam->applicator;
    char what[128];
    snprintf(what, sizeof what, "%s: beam %d applicator", plan->source, beam->number);
    /* the plan's opening: its size on each axis (cm), circular or not */
    bool in_plan = false, plan_circ = false;
    double px = NAN, py = NAN;
    if (a->present && a->has_geometry && a->aperture_shape) {
        const char *shape = a->aperture_shape;
        if (strcmp(shape, "SYM_CIRCULAR") == 0 && isfinite(a->opening_mm)) {
            px = py = a->opening_mm * 0.1;
            plan_circ = true;
        } else if (strcmp(shape, "SYM_SQUARE") == 0 && isfinite(a->opening_mm)) {
            px = py = a->opening_mm * 0.1;
        } else if (strcmp(shape, "SYM_RECTANGLE") == 0 && isfinite(a->opening_x_mm) &&
                   isfinite(a->opening_y_mm)) {
            px = a->opening_x_mm * 0.1;
            py = a->opening_y_mm * 0.1;
        } else {
            return sl_error_set(err, SL_EINPUT,
                                "%s: beam %d: ApplicatorApertureShape (300A,0432) %s without "
                                "the opening it needs",
                                plan->source, beam->number, shape);
        }
        in_plan = true;
    }
    /* the model's catalogue entry of this ID, at the isocentre */
    const sl_applicator_size *c = NULL;
    for (size_t i = 0; a->present && a->id && i < ncat; i++)
        if (cat[i].id && strcmp(cat[i].id, a->id) == 0)
            c = &cat[i];
    double cx = NAN, cy = NAN;
    if (c) {
        double s = (beam->sad_mm * 0.1) / c->nominal_ssd_cm;
        cx = c->x_cm * s;
        cy = (c->circular ? c->x_cm : c->y_cm) * s;
    }
    bool circ;
    double x, y;
    if (in_plan && c) {
        /* the larger on each axis whether they agree or not (a plan's 9.1
         * cm within the tolerance of 10 cm still moved the edge 4.5 mm in
         * and read a third lower); the tolerance decides the warning */
        *src = SL_FIELD_LARGER_APPLICATOR;
        f->applicator_disagrees = !(sizes_agree(px, cx) && sizes_agree(py, cy));
        f->plan_opening_cm[0] = px;
        f->plan_opening_cm[1] = py;
        f->model_opening_cm[0] = cx;
        f->model_opening_cm[1] = cy;
        circ = plan_circ && c->circular;
        x = fmax(px, cx);
        y = fmax(py, cy);
    } else if (in_plan) {
        *src = SL_FIELD_PLAN_APPLICATOR;
        circ = plan_circ;
        x = px;
        y = py;
    } else if (c) {
        *src = SL_FIELD_CATALOGUE;
        circ = c->circular;
        x = cx;
        y = cy;
    } else {
        return SL_OK;
    }
    if (circ)
        return sl_outline_circle(x, what, out, err);
    return sl_outline_rectangle(x, y, what, out, err);
}

/* How far (cm, at the isocentre) a cutout's vertex may lie outside its
 * applicator's opening before the plan is refused: the opening comes from
 * the catalogue's nominal size, and planning systems round the outline. */
#define CUTOUT_OUTSIDE_CM 0.1

double sl_field_distance(const sl_field *f, sl_vec2 uv)
{
    double d = sl_outline_distance(f->edge, uv);
    if (f->outer && d > 0 && sl_outline_distance(f->outer, uv) < 0)
        return -d; /* under a shield: inside by its distance from the shield's edge */
    return d;
}

sl_status sl_field_build(const sl_plan *plan, const sl_beam *beam,
                         const sl_applicator_size *catalogue, size_t ncatalogue, sl_field *out,
                         sl_error *err)
{
    memset(out, 0, sizeof *out);
    sl_field_source app_src = SL_FIELD_CATALOGUE;
    sl_status st = applicator_outline(plan, beam, catalogue, ncatalogue, out, &app_src, err);
    if (st != SL_OK)
        return st;

    size_t naper = 0, nshield = 0;
    for (size_t i = 0; i < beam->nblocks; i++) {
        if (beam->blocks[i].type == SL_BLOCK_APERTURE)
            naper++;
        else
            nshield++;
    }
    if (naper == 0 && !out->applicator) {
        const char *id = beam->applicator.present && beam->applicator.id ? beam->applicator.id
                                                                          : "(none)";
        sl_field_free(out);
        return sl_error_set(err, SL_EINPUT,
                            "%s: beam %d: the field size is unknown: no cutout (APERTURE block), "
                            "no Applicator Geometry Sequence, and applicator '%s' is not in the "
                            "applicator catalogue (give a model file that lists it)",
                            plan->source, beam->number, id);
    }

    /* loops: the openings (cutout polygons, or the applicator), then shields */
    size_t nloops = (naper ? naper : 1) + nshield;
    sl_outline_loop *loops = calloc(nloops, sizeof *loops);
    sl_vec2 **pts = calloc(nloops, sizeof *pts);
    if (!loops || !pts) {
        free(loops);
        free(pts);
        sl_field_free(out);
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    }
    size_t k = 0;
    if (naper == 0) {
        size_t n;
        loops[k].points = sl_outline_loop_points(out->applicator, 0, &n);
        loops[k++].n = n;
    }
    for (int pass = 0; pass < 2 && st == SL_OK; pass++) {
        for (size_t i = 0; i < beam->nblocks; i++) {
            const sl_block *b = &beam->blocks[i];
            if ((pass == 0) != (b->type == SL_BLOCK_APERTURE))
                continue;
            pts[k] = malloc(b->npoints * sizeof **pts);
            if (!pts[k]) {
                st = sl_error_set(err, SL_ENOMEM, "out of memory");
                break;
            }
            for (size_t j = 0; j < b->npoints; j++)
                pts[k][j] = (sl_vec2){b->points[j].x * 0.1, b->points[j].y * 0.1};
            loops[k].points = pts[k];
            loops[k].n = b->npoints;
            k++;
        }
    }
    char what[128];
    snprintf(what, sizeof what, "%s: beam %d %s", plan->source, beam->number,
             naper ? "cutout" : "field");
    if (st == SL_OK)
        st = sl_outline_create(loops, k, what, &out->edge, err);
    if (st == SL_OK && nshield > 0 && k > nshield)
        st = sl_outline_create(loops, k - nshield, what, &out->outer, err);
    /* openings must not nest (one would turn into a hole), and a shielding
     * block must be a hole in an opening, not an island */
    for (size_t i = 0; st == SL_OK && i < naper; i++) {
        if (sl_outline_loop_depth(out->edge, i) != 0)
            st = sl_error_set(err, SL_EINPUT,
                              "%s: beam %d: one APERTURE block lies inside another",
                              plan->source, beam->number);
    }
    for (size_t i = (naper ? naper : 1); st == SL_OK && i < k; i++) {
        if (sl_outline_loop_depth(out->edge, i) % 2 == 0)
            st = sl_error_set(err, SL_EINPUT,
                              "%s: beam %d: a SHIELDING block lies outside the field opening",
                              plan->source, beam->number);
    }
    /* a cutout sits in its applicator: a vertex beyond the opening (more
     * than CUTOUT_OUTSIDE_CM, for rounding) is not a field this applicator
     * can give, and would be placed as a larger field than delivered */
    for (size_t i = 0; st == SL_OK && out->applicator && i < beam->nblocks; i++) {
        const sl_block *b = &beam->blocks[i];
        if (b->type != SL_BLOCK_APERTURE)
            continue;
        for (size_t j = 0; j < b->npoints; j++) {
            sl_vec2 q = {b->points[j].x * 0.1, b->points[j].y * 0.1};
            double d = sl_outline_distance(out->applicator, q);
            if (d > CUTOUT_OUTSIDE_CM) {
                st = sl_error_set(err, SL_EINPUT,
                                  "%s: beam %d: block %d: Block Data (300A,0106): point %zu "
                                  "(%.1f, %.1f mm) lies %.1f cm outside the opening of "
                                  "applicator '%s' at the isocentre: a cutout cannot be larger "
                                  "than its applicator",
                                  plan->source, beam->number, b->number, j + 1,
                                  b->points[j].x, b->points[j].y, d,
                                  beam->applicator.id ? beam->applicator.id : "(unnamed)");
                break;
            }
        }
    }
    for (size_t i = 0; i < nloops; i++)
        free(pts[i]);
    free(pts);
    free(loops);
    if (st != SL_OK) {
        sl_field_free(out);
        return st;
    }
    out->has_cutout = naper > 0;
    out->has_shielding = nshield > 0;
    out->source = naper ? SL_FIELD_CUTOUT : app_src;
    out->area_cm2 = sl_outline_area(out->edge);
    return SL_OK;
}
