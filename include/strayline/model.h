/*
 * strayline: the model file of one treatment machine, and its evaluation.
 *
 * A model file (YAML, one per machine, under models/; its format is in
 * models/README.md) holds the machine, its applicator catalogue and inserts,
 * the outputs (dose per MU at the central-axis maximum, depth of that
 * maximum, effective SSD) of each energy and applicator, provenance, and for
 * each energy x applicator x insert x depth x direction the fitted profile
 * (profile.h) with its covariance and statistics and the measured points.
 *
 * Evaluation (sl_model_select, then sl_curves_eval_query) gives the dose in
 * percent of the central-axis maximum at a depth (cm), a distance from the
 * field edge (cm) and a direction from the central axis, with its standard
 * uncertainty, its budget and flags:
 *  - energy and applicator must be commissioned: no interpolation across
 *    energies or applicators (an input error that lists what is);
 *  - between measured depths, log dose is interpolated linearly in depth;
 *    outside them the nearest depth is used and flagged;
 *  - profiles measured in several directions at one depth are interpolated
 *    in log dose by the point's direction from the central axis (crossplane
 *    along IEC X at 0 deg, diagonal at 45, inplane along IEC Y at 90); each
 *    keeps its own measured range; an unknown direction takes the highest;
 *  - beyond a profile's measured distances the fitted tail is used but never
 *    below the level of its farthest measured points (far from the field,
 *    head leakage flattens the curve), flagged; inside the field (distance
 *    < 0) nothing is given, only a flag;
 *  - a cutout with no profiles of its own gets a conservative stand-in: the
 *    largest of the open applicator's profiles from the cutout's edge, the
 *    same from the applicator's edge, and every commissioned insert of that
 *    energy and applicator from the cutout's edge (each on the open output),
 *    flagged, with half the spread between them as an uncertainty;
 *  - a profile whose fit is poor (profile.h) marks the value and widens its
 *    fit uncertainty by its largest relative residual;
 *  - each profile has a beam tilt and an SSD (model format 2); between
 *    commissioned SSDs, and at each SSD between commissioned tilts, log dose
 *    is interpolated linearly as between depths; beyond them by more than
 *    SL_TILT_TOLERANCE_DEG / SL_SSD_TOLERANCE_CM the nearest is used,
 *    flagged, with an uncertainty component growing with the distance;
 *  - the uncertainty combines the fit's standard error (covariance), the
 *    stated measurement uncertainty, the interpolation spread (between
 *    depths and directions), beyond the measured range an extrapolation
 *    term of 2 % per cm, the stand-in spread, and the machine's transfer
 *    uncertainty by distance band (machine.h).
 */
#ifndef STRAYLINE_MODEL_H
#define STRAYLINE_MODEL_H

#include <stdbool.h>
#include <stddef.h>
#include <stdio.h>

#include "strayline/error.h"
#include "strayline/machine.h"
#include "strayline/profile.h"
#include "strayline/util.h"

#ifdef __cplusplus
extern "C" {
#endif

#define SL_MODEL_FORMAT "strayline-model"
#define SL_MODEL_FORMAT_VERSION 2
/* Tolerances beyond the commissioned tilts (degrees) and SSDs (cm) within
 * which the nearest commissioned one is used without a mark (common
 * practice: set-up reproducibility of a clinical electron field). */
#define SL_TILT_TOLERANCE_DEG 2.0
#define SL_SSD_TOLERANCE_CM 2.0
/* Relative standard uncertainty per degree of tilt, and per cm of SSD, by
 * which a value lies beyond the nearest commissioned one (the same rate as
 * the distance extrapolation: a stated value, common practice). */
#define SL_UNCOMMISSIONED_PER_DEG 0.02
#define SL_UNCOMMISSIONED_PER_CM 0.02
/* Obliquity above which the reports carry a caution (common practice:
 * depth-dose effects of obliquity become significant there). */
#define SL_OBLIQUITY_CAUTION_DEG 45.0
/* Relative extrapolation uncertainty per cm beyond the measured range. */
#define SL_EXTRAPOLATION_PER_CM 0.02
/* Beyond the commissioned depths the nearest depth's profiles are used.
 * Where the dose rises toward the uncommissioned side (between the two
 * commissioned depths nearest it), the extrapolation component takes that
 * rise continued: the logarithmic slope per cm times the depth beyond, as a
 * relative standard uncertainty; where it falls, holding the nearest depth
 * already errs high. Shallower than the shallowest commissioned depth, and
 * for a model of one depth, at least this relative uncertainty per cm
 * applies (a strayline default chosen to be cautious, not a published
 * value: out-of-field dose near the surface can change by a fifth or more
 * over a centimetre of depth, even where the commissioned depths fall). */
#define SL_DEPTH_OUTSIDE_PER_CM 0.25
/* The plausible range of an evaluation: distances from the field edge up
 * to this (cm; nothing in a treatment room is farther) and depths up to
 * SL_MAX_DEPTH_CM. Callers refuse anything beyond with an input error. */
#define SL_MAX_DISTANCE_CM 500.0
#define SL_MAX_DEPTH_CM 100.0

typedef struct sl_model_profile {
    double energy_mev;
    char *applicator;
    char *insert;
    double depth_cm;
    char *direction;
    double tilt_deg;          /* signed beam tilt (0 in version-1 files) */
    double ssd_cm;            /* SSD measured at (the nominal one in version-1 files) */
    char *data_file;
    char sha256[SL_SHA256_HEX_LEN];
    double rel_uncertainty, floor_percent;
    bool from_positions;
    double width_found_cm, width_nominal_cm; /* NAN unless from positions */
    sl_profile_fit fit;
    size_t n;
    double *distance_cm;
    double *dose_percent;
} sl_model_profile;

typedef struct sl_provenance {
    char *measurement_set;
    char *measurement_set_sha256;
    char *tool;
    char *created;
    char *measured_date, *measured_by, *detector, *reference;
} sl_provenance;

/* A scale factor of one energy x applicator from in-vivo evidence
 * (`invivo propose --scale`, model key invivo_scales): the evaluation
 * multiplies the dose by `factor`, adds the relative component `rel_u`
 * (the half-width of the 95 % interval of the mean log ratio: errs high) to
 * the transfer uncertainty, marks the value SL_MF_INVIVO_SCALED, and for a
 * factor below 1 keeps the upper bound (k = 2) at least the unscaled
 * estimate. */
#define SL_SCALE_MIN 0.2
#define SL_SCALE_MAX 5.0
typedef struct sl_model_scale {
    double energy_mev;
    char *applicator;
    double factor;            /* measured / estimated, exp(mean log ratio) */
    int readings;             /* readings behind it */
    char *first_date, *last_date;
    double mean_log_ratio;    /* ln(measured / estimated) */
    double ci_lo, ci_hi;      /* 95 % interval of the mean log ratio (t) */
    double p_value;           /* t test of mean = 0, two-sided */
    char *source;             /* where the readings came from (log, model, tool) */
} sl_model_scale;

/* Relative standard uncertainty the scale adds: the half-width of its 95 %
 * interval (a k = 2 width used as k = 1: errs high, common practice for a
 * conservative screening value). */
double sl_model_scale_rel_u(const sl_model_scale *s);

typedef struct sl_model {
    char *source;            /* file it was read from (NULL when built in memory) */
    char sha256[SL_SHA256_HEX_LEN];
    char *model_version;
    int format_version;      /* of the file read (SL_MODEL_FORMAT_VERSION when built) */
    char *notice;            /* e.g. the invented-data notice */
    sl_machine machine;
    sl_provenance provenance;
    size_t nprofiles;
    sl_model_profile *profiles;
    size_t nscales;          /* invivo_scales (optional; none in files before them) */
    sl_model_scale *scales;
} sl_model;

sl_status sl_model_load(const char *path, sl_model **out, sl_error *err);
sl_status sl_model_load_buffer(const char *data, size_t size, const char *name, sl_model **out,
                               sl_error *err);
/* Write a model file (the caller opens and commits the file). */
sl_status sl_model_write(const sl_model *m, FILE *fp, sl_error *err);
void sl_model_free(sl_model *m);
/* The scale of one energy and applicator, NULL when none. */
const sl_model_scale *sl_model_find_scale(const sl_model *m, double energy_mev,
                                          const char *applicator);

/* ------------------------------------------------------ evaluation -- */

enum {
    SL_MF_IN_FIELD = 1,         /* in field: the model does not apply */
    SL_MF_DEPTH_OUTSIDE = 2,    /* depth outside the commissioned depths: nearest used */
    SL_MF_EXTRAPOLATED = 4,     /* distance beyond the measured range */
    SL_MF_OPEN_FOR_CUTOUT = 8,  /* open-applicator profiles used for an uncommissioned cutout */
    SL_MF_POINTS_MODE = 16,     /* interpolated measured points rather than the fit */
    SL_MF_POOR_FIT = 32,        /* a profile used has a poor fit: uncertainty widened */
    SL_MF_NEAR_EDGE = 64,       /* (dose stage) closer to the field edge than SL_NEAR_EDGE_CM */
    SL_MF_TILT_OUTSIDE = 128,   /* tilt beyond the commissioned tilts: nearest used */
    SL_MF_SSD_OUTSIDE = 256,    /* SSD beyond the commissioned SSDs: nearest used */
    SL_MF_INVIVO_SCALED = 512,  /* the dose was scaled by an in-vivo scale factor */
    SL_MF_POINT_REACH = 1024    /* (dose stage) an organ given as a point: its upper bound
                                   covers the organ reaching nearer the field from it */
};

/* A short text for each flag set, for reports. */
const char *sl_model_flag_text(unsigned flag);

typedef enum sl_eval_mode { SL_EVAL_FIT, SL_EVAL_POINTS } sl_eval_mode;

typedef struct sl_curve_set sl_curve_set;

/* The profiles of one energy (MeV), applicator and insert (NULL or
 * SL_INSERT_OPEN for none). *flags receives SL_MF_OPEN_FOR_CUTOUT when the
 * open profiles stand in for the insert. */
sl_status sl_model_select(const sl_model *m, double energy_mev, const char *applicator,
                          const char *insert, sl_curve_set **out, unsigned *flags,
                          sl_error *err);
void sl_curve_set_free(sl_curve_set *c);

/* Commissioned tilts (degrees, increasing) and SSDs (cm, increasing) of a
 * curve set: every tilt measured at any SSD, every SSD. */
size_t sl_curves_tilts(const sl_curve_set *c, const double **tilts);
size_t sl_curves_ssds(const sl_curve_set *c, const double **ssds);

/* Commissioned depths (cm) and distance range of a curve set: the nearest
 * and the farthest distance measured in any direction. */
size_t sl_curves_depths(const sl_curve_set *c, const double **depths);
void sl_curves_range(const sl_curve_set *c, double *lo_cm, double *hi_cm);

typedef struct sl_model_value {
    double percent;          /* of the central-axis maximum; NAN in field */
    double u_percent;        /* combined standard uncertainty */
    double u_fit, u_meas, u_interp, u_extrap;
    double u_standin;        /* half the spread of the stand-in's candidates */
    double u_transfer;       /* water tank to patient, by distance band */
    double u_uncommissioned; /* tilt or SSD beyond the commissioned ones */
    double scale;            /* in-vivo scale factor applied (1: none); u_transfer holds its
                                uncertainty and, below 1, the widening to the unscaled value */
    double electron_percent; /* A and B terms (after any transmission) */
    double photon_percent;   /* C term */
    double depth_used_cm;
    double tilt_used_deg, ssd_used_cm; /* the nearest commissioned when outside */
    unsigned flags;
} sl_model_value;

/* Where and how to evaluate. */
typedef struct sl_eval_query {
    double depth_cm;
    double distance_cm;      /* from the field edge (the cutout's, when there is one) */
    double app_distance_cm;  /* from the applicator's opening; NAN when unknown */
    double angle_deg;        /* direction from the central axis in the beam's eye view,
                                folded into 0..90: 0 along IEC X, 90 along IEC Y; NAN:
                                unknown (the highest direction is taken) */
    sl_eval_mode mode;
    double electron_t;       /* what-if transmission of the electron part (1: none) */
    double tilt_deg;         /* beam tilt toward the point's side (signed); NAN: unknown (the
                                highest commissioned tilt is taken) */
    double ssd_cm;           /* SSD; 0 or NAN: the nominal one */
} sl_eval_query;

void sl_curves_eval_query(const sl_curve_set *c, const sl_eval_query *q, sl_model_value *out);

/* The percent of sl_curves_eval_query alone, bitwise the same, for callers
 * that use nothing else (the setup shift's neighbouring evaluations): the
 * uncertainty components, whose covariance forms cost as much as the
 * profiles' exponentials, are not computed. Thread-safe. */
double sl_curves_eval_percent(const sl_curve_set *c, const sl_eval_query *q);

/* Whether a query's direction (angle_deg) can change an evaluation of the
 * set: some depth of it, of a tilt or SSD of it, or of a stand-in's
 * inserts, has profiles in more than one direction. */
bool sl_curves_use_direction(const sl_curve_set *c);

/* Prepare a curve set for the setup shift (cm, > 0) that
 * sl_curves_eval_percent_shift will be asked for: each profile's decay
 * factors over twice the shift. Not thread-safe; call it before the
 * evaluations start. */
void sl_curves_prepare_shift(sl_curve_set *c, double shift_cm);

/* The percent of q with its distances moved by the setup shift (cm): out[0]
 * at distance_cm + shift_cm (app_distance_cm + shift_cm), out[1] at
 * max(distance_cm - shift_cm, 0) (app_distance_cm - shift_cm), each what
 * sl_curves_eval_percent gives there. The two share the walk down the curve
 * set, which depends on the depth, direction, tilt and SSD alone, and, for
 * a set prepared for this shift, the profiles' exponentials: the nearer
 * distance's are the farther's times the decay factors, which agrees with
 * the single evaluation within 1e-13 relative (the rounding grows with the
 * distance over the decay length; a term that underflows at the farther
 * distance stays 0 at the nearer, where it is below any other term's last
 * place). out[0] is bitwise sl_curves_eval_percent's, and so is out[1] for
 * a set not prepared, or where neither its field-edge distance (clamped at
 * 0) nor its applicator distance (below 0 or unknown) was linked.
 * Thread-safe. */
void sl_curves_eval_percent_shift(const sl_curve_set *c, const sl_eval_query *q,
                                  double shift_cm, double out[2]);

/* sl_curves_eval_query and sl_curves_eval_percent_shift at once, each
 * result as those give it (out bitwise, shifted as the pair). For the
 * stand-in of an uncommissioned cutout the lean walk of the pair also
 * takes the query's own distance and chooses the candidate that gives the
 * dose, so that the full evaluation, with its uncertainty components, is
 * made of that candidate alone, and the others give their flags only.
 * Thread-safe. */
void sl_curves_eval_query_shift(const sl_curve_set *c, const sl_eval_query *q, double shift_cm,
                                sl_model_value *out, double shifted[2]);

/* Value at depth (cm) and distance from the field edge (cm), direction
 * unknown, applicator edge unknown (sl_curves_eval_query). `electron_t`
 * is a transmission (0..1) applied to the electron part only, for a what-if
 * shield; 1 for none. Thread-safe. */
void sl_curves_eval(const sl_curve_set *c, double depth_cm, double distance_cm,
                    sl_eval_mode mode, double electron_t, sl_model_value *out);

/* One query (select, evaluate, free); sl_model_eval with the direction and
 * the applicator edge unknown. */
sl_status sl_model_eval_query(const sl_model *m, double energy_mev, const char *applicator,
                              const char *insert, const sl_eval_query *q, sl_model_value *out,
                              sl_error *err);

sl_status sl_model_eval(const sl_model *m, double energy_mev, const char *applicator,
                        const char *insert, double depth_cm, double distance_cm,
                        sl_eval_mode mode, sl_model_value *out, sl_error *err);

#ifdef __cplusplus
}
#endif

#endif
