/*
 * strayline: the field outline of an electron beam at the isocentric plane,
 * in IEC beam-limiting-device coordinates (cm).
 *
 * The field edge is, in order of preference: the cutout (the union of the
 * APERTURE block polygons, with SHIELDING blocks as holes); the applicator
 * opening that the plan's Applicator Geometry gives; the nominal field of
 * the applicator in the machine's catalogue (from the model file), scaled
 * from the nominal SSD to the isocentric plane. The applicator's own outline
 * is kept as well, since leakage through the applicator is referenced to it.
 *
 * The plan's Applicator Opening is taken as the field size at the
 * isocentric plane (DICOM does not say which plane; for the usual SAD =
 * nominal SSD = 100 cm the two coincide).
 */
#ifndef STRAYLINE_FIELD_H
#define STRAYLINE_FIELD_H

#include "strayline/outline.h"
#include "strayline/plan.h"

#ifdef __cplusplus
extern "C" {
#endif

/* One applicator of a machine's catalogue (filled from the model file). */
typedef struct sl_applicator_size {
    const char *id;
    bool circular;          /* else square or rectangular */
    double x_cm, y_cm;      /* field size at the nominal SSD (diameter when circular) */
    double nominal_ssd_cm;
} sl_applicator_size;

typedef enum sl_field_source {
    SL_FIELD_CUTOUT,
    SL_FIELD_PLAN_APPLICATOR,
    SL_FIELD_CATALOGUE,
    SL_FIELD_LARGER_APPLICATOR /* the plan's and the catalogue's: the larger on each axis */
} sl_field_source;

typedef struct sl_field {
    sl_outline *edge;        /* the field edge that distances are measured from */
    sl_outline *applicator;  /* the applicator opening; NULL when unknown */
    sl_outline *outer;       /* with SHIELDING blocks: the openings without their holes
                                (NULL otherwise) */
    sl_field_source source;
    bool has_cutout;
    bool has_shielding;
    double area_cm2;         /* of the field edge outline, isocentric plane */
    /* the plan's Applicator Geometry and the model's catalogue entry of the
     * same applicator ID disagree (beyond 0.5 cm and 10 %); their sizes when
     * both are known (cm, x and y at the isocentre; a circle's diameter
     * twice) */
    bool applicator_disagrees;
    double plan_opening_cm[2], model_opening_cm[2];
} sl_field;

const char *sl_field_source_name(sl_field_source s);

/* Signed distance (cm, isocentric plane, negative inside) of uv from the
 * field edge, where a point under a SHIELDING block inside the opening
 * counts as in the field: the measured profiles say nothing about the dose
 * under a block with the field on every side, the planning system does. */
double sl_field_distance(const sl_field *f, sl_vec2 uv);

sl_status sl_field_build(const sl_plan *plan, const sl_beam *beam,
                         const sl_applicator_size *catalogue, size_t ncatalogue, sl_field *out,
                         sl_error *err);

void sl_field_free(sl_field *f);

#ifdef __cplusplus
}
#endif

#endif
