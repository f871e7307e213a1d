/*
 * strayline: the placement stage. For every TREATMENT electron beam of a plan
 * and every ROI of its structure set, where each organ sample lies relative
 * to the field: its signed distance from the field edge (cm, positive
 * outside), measured in the plane perpendicular to the central axis through
 * the sample (the outline scaled by divergence to that plane), its distance
 * from the applicator outline likewise, and its depth (cm), the in-body path
 * length along the ray from the source (surface.h).
 *
 * A bolus on the skin is tissue on the ray: the ROIs the beam's Referenced
 * Bolus Sequence names (DICOM PS3.3 C.8.8.14, RT Beams Module), or, when it
 * names none, every ROI typed BOLUS (with a caution that says so), are
 * added to the body for this beam's depths (surface.h: the union, each
 * part counted once) and for the central axis's entry and SSD. The option
 * no_bolus leaves them out, to show the difference.
 *
 * Per beam it also finds where the central axis enters the body, the SSD
 * there (compared with the plan's) and the obliquity of the surface there.
 *
 * The result keeps every per-sample value, because the dose stage applies
 * the models sample by sample; the summaries (minimum, mean, maximum, in-field
 * fraction) are what `strayline locate` prints.
 */
#ifndef STRAYLINE_LOCATE_H
#define STRAYLINE_LOCATE_H

#include <stdbool.h>

#include "strayline/field.h"
#include "strayline/frame.h"
#include "strayline/plan.h"
#include "strayline/sampling.h"
#include "strayline/structures.h"

#ifdef __cplusplus
extern "C" {
#endif

typedef struct sl_locate_options {
    const sl_applicator_size *catalogue; /* applicator field sizes (model file); may be NULL */
    size_t ncatalogue;
    double depth_cm;        /* NAN: depths from the EXTERNAL ROI; else this depth everywhere */
    bool include_external;  /* sample the EXTERNAL ROI as an organ too */
    bool no_bolus;          /* leave the bolus out of depths (a what-if) */
    int threads;            /* 0: every online core */
    sl_sampling_options sampling;
} sl_locate_options;

void sl_locate_default_options(sl_locate_options *o);

enum {
    SL_SAMPLE_BEHIND_SOURCE = 1, /* at or beyond the source plane: not placed */
    SL_SAMPLE_OUTSIDE_BODY = 2   /* outside the EXTERNAL contour */
};

/* Distance of the central-axis SSD found from the plan's SSD that draws a
 * warning (cm). */
#define SL_SSD_WARN_CM 1.0

typedef struct sl_organ_place {
    double *distance_cm;     /* per sample; NAN for samples behind the source */
    double *app_distance_cm; /* per sample; NAN when the applicator outline is unknown */
    double *depth_cm;        /* per sample */
    unsigned char *flags;    /* SL_SAMPLE_* per sample */
    size_t placed;           /* samples not behind the source */
    double min_distance_cm, mean_distance_cm, max_distance_cm; /* volume-weighted mean */
    double min_app_distance_cm;
    double min_depth_cm, max_depth_cm;
    double in_field_fraction;     /* of the volume (of the samples, for points) */
    double outside_body_fraction;
    size_t behind_source;
    size_t nearest;               /* sample nearest the field edge (valid when placed > 0) */
} sl_organ_place;

/* Where a beam's bolus came from. */
typedef enum sl_bolus_from {
    SL_BOLUS_NONE = 0,     /* no bolus on this beam */
    SL_BOLUS_REFERENCED,   /* the beam's Referenced Bolus Sequence names it */
    SL_BOLUS_TYPED         /* the beam names none; ROIs typed BOLUS are taken */
} sl_bolus_from;

struct sl_body;

typedef struct sl_beam_place {
    const sl_beam *beam;          /* into the plan */
    sl_position position;
    sl_frame frame;
    sl_field field;
    double ssd_plan_cm;           /* NAN when the plan gives none */
    bool entry_found;
    sl_vec3 entry_cm;             /* central-axis entry point, patient coordinates */
    double ssd_found_cm;          /* NAN when the axis misses the body */
    double obliquity_deg;         /* NAN when unknown */
    sl_vec3 normal_bld;           /* the body's outward normal at the entry, in the beam
                                     limiting device frame (z toward the source); NAN when
                                     the obliquity is unknown */
    sl_organ_place *organs;       /* one per organ of the location */
    size_t nboli;                 /* bolus ROIs on this beam's rays */
    const sl_roi **boli;          /* into the structure set */
    sl_bolus_from boli_from;
    bool boli_counted;            /* false: left out by option (no_bolus) */
    sl_notes notes;
    /* private: the solids this beam's depths pass through (the body, then
     * its bolus when counted), owned by the location */
    size_t nparts;
    const struct sl_body **parts;
} sl_beam_place;

typedef struct sl_skipped_beam {
    int number;
    const char *name;
    const char *reason;
} sl_skipped_beam;

typedef struct sl_location {
    size_t norgans;
    const sl_roi **rois;          /* into the structure set */
    sl_organ_samples *samples;
    size_t nbeams;
    sl_beam_place *beams;
    size_t nskipped;
    sl_skipped_beam *skipped;
    const sl_roi *external;       /* NULL when the structure set has none */
    bool depth_from_body;         /* false: every depth is the option's depth_cm */
    double depth_cm;
    double slice_spacing_cm;      /* typical, for single-slice ROIs */
    sl_notes notes;
    /* private: the body and the bolus solids (one per bolus ROI used),
     * kept for sl_location_depth */
    struct sl_body *body;
    size_t nbolus_solids;
    const sl_roi **bolus_rois;
    struct sl_body **bolus_solids;
} sl_location;

/* An organ is in, or touching, the field when any of it lies inside the
 * field outline or closer than this to its edge (cm): out-of-field models do
 * not apply there and the planning system's dose must be used. */
#define SL_IN_FIELD_MARGIN_CM 0.1

bool sl_organ_in_field(const sl_organ_place *p);

/* Fraction of an organ's volume outside the body contour above which it is
 * noted (contours drawn a hair outside the skin are common). */
#define SL_OUTSIDE_BODY_NOTE 0.005

/* Place every organ for every TREATMENT electron beam. The plan and the
 * structure set must already be paired (sl_pair_check). Input errors: no
 * EXTERNAL ROI and no depth given, a field outline that cannot be built,
 * contours that are not axial. */
sl_status sl_locate(const sl_plan *plan, const sl_structure_set *ss,
                    const sl_locate_options *opt, sl_location **out, sl_error *err);

void sl_location_free(sl_location *loc);

/* Depth (cm) of point p (patient coordinates, cm) for a placed beam of the
 * location, as its samples' depths are found: the path inside the body and
 * the beam's bolus along the ray from the source, or the option's depth.
 * NAN when out of memory. */
double sl_location_depth(const sl_location *loc, const sl_beam_place *bp, sl_vec3 p);

/* The beam's tilt toward a point, in degrees: the angle between the central
 * axis and the surface normal at the entry, in the plane through the axis
 * and the point at (x_cm, y_cm) of the beam limiting device frame, positive
 * when the beam leans toward the point's side (the surface falls away from
 * the source there), negative when away; 0 on the axis. NAN when the
 * obliquity is unknown. Its size is the obliquity for a point in the plane
 * of the lean. */
double sl_beam_tilt_toward(const sl_beam_place *bp, double x_cm, double y_cm);

#ifdef __cplusplus
}
#endif

#endif
