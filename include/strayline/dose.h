/*
 * strayline: the organ-dose stage of `estimate`.
 *
 * For every TREATMENT electron beam placed by the locate stage:
 *   reference dose per fraction (cGy, at the central-axis maximum)
 *     = Beam Meterset (MU) x the model's dose per MU for the energy and
 *       applicator x inverse square ((SSDeff + dmax) / (SSDeff + g + dmax))^2
 *       (g = plan SSD - nominal SSD) x the cutout output factor (1, flagged,
 *       when the model has none),
 *   or the reference dose given by option (said in every report);
 * then at every organ sample the model's percent at its depth and distance
 * from that beam's field edge; the beams of a fraction group add up, and the
 * fraction groups add up over the course, each with its own fractions.
 *
 * Uncertainty (k = 1) at a sample: the model's combined standard
 * uncertainty (fit, measurement, interpolation, extrapolation, stand-in,
 * transfer: model.h) and a setup shift (default 0.5 cm of distance, as a
 * standard uncertainty; the larger change of the model's value over +/- the
 * shift), in quadrature; beams and fractions add linearly (fully
 * correlated, the conservative choice). Upper bounds are estimate + 2 u
 * (k = 2).
 *
 * A cutout is matched to a model insert by name (block name or tray id) or
 * by option; the match stands only when the insert fits the beam's
 * applicator (else an input error) and its area and equivalent square are
 * within SL_INSERT_MATCH_TOLERANCE of the plan's cutout (else a warning that
 * names both, and the stand-in of model.h is used). The cutout factor is
 * applied once: to an insert's profiles that are relative to its own
 * central-axis maximum, never to profiles relative to the open field's.
 *
 * Per organ: maximum, volume-weighted mean, near-maximum (the least dose in
 * the hottest 0.03 cm3, or 2 % of the volume when that is smaller) and the
 * dose at the point nearest the field edge, per fraction of each group and
 * over the course. The upper bound (k = 2) of the maximum is the highest of
 * the samples' bounds, and that of the near-maximum the near-maximum of the
 * samples' bounds: a sample less hot but farther out can carry the higher
 * bound, as the uncertainty grows with distance; each such statistic's u is
 * then the one its bound implies. Organs in or touching any field are not estimated: the
 * planning system's dose applies there.
 *
 * With the planning system's dose (RT Dose: one PLAN dose, or BEAM doses
 * that cover every placed beam once) the two meet at a seam: a sample
 * nearer than tps_zone_cm to any field edge takes the planning system's
 * course dose (trilinear in its grid), a sample beyond takes the model's.
 * In-field organs are then estimated too. A sample in the zone but outside
 * the grid keeps the model's dose (counted, said); an in-field one leaves
 * its organ unestimated. Each organ says how much of its volume, and
 * whether its maximum and nearest point, came from the planning system. In
 * the band from 0 to SL_TPS_BAND_CM beyond the edges, where both exist, the
 * ratio model / planning system of the course dose is gathered per beam
 * (a BEAM dose of one beam) or for all beams together, in 1 cm bins of the
 * distance from the nearest edge.
 */
#ifndef STRAYLINE_DOSE_H
#define STRAYLINE_DOSE_H

#include <stdbool.h>
#include <stddef.h>

#include "strayline/locate.h"
#include "strayline/model.h"
#include "strayline/rtdose.h"

#ifdef __cplusplus
extern "C" {
#endif

#define SL_NEARMAX_CC 0.03
#define SL_NEARMAX_FRACTION 0.02
#define SL_BEAM_DOSE_TOLERANCE 0.10   /* warn when the plan's Beam Dose differs more */
/* the reference dose is raised to what the plan's Beam Dose or prescription
 * implies once that is higher by more than this: past the rounding of a
 * decimal string, not a tolerance (a plan that states a dose 2 % above the
 * MU's reads 2 % higher) */
#define SL_BEAM_DOSE_RAISE_ABOVE 0.001
/* A planning system's dose (--tps-dose) that reads below this share of the
 * course dose the plan's beams give at a beam's reference point (on its
 * central axis at the depth of maximum: the reference doses x fractions of
 * every beam whose field holds the point) is not used in the fields, where
 * it would stand alone, and the organs there are not judged: a dose of one
 * fraction, of another plan version, or scaled wrongly (common practice: an
 * electron field's dose at its reference point is its reference dose; a
 * plan of two fractions exported per fraction reads 0.5). Above
 * SL_TPS_MAX_ABOVE times it, a warning. */
#define SL_TPS_MAX_BELOW 0.7
#define SL_TPS_MAX_ABOVE 2.0
/* SSDs accepted around the model's nominal SSD, cm (common practice: the
 * applicator ends about 5 cm above the nominal surface; extended SSDs for
 * electrons rarely pass 120 cm) */
#define SL_SSD_SHORT_MAX_CM 5.0
#define SL_SSD_LONG_MAX_CM 30.0

typedef struct sl_shield {
    const char *roi;
    double transmission;  /* applied to the electron part of the model only */
} sl_shield;

/* An organ given as a point that stands for an organ of some size: how
 * far (cm) the organ may reach from its point toward a field. Its upper
 * bound then covers the model's value that much nearer each field, and a
 * point nearer a field than that is not estimated (the organ may lie in
 * it). */
typedef struct sl_point_reach {
    const char *roi;
    double cm;
} sl_point_reach;

/* The reach of a cardiac device given as a point, cm: half a pulse
 * generator's width and a little more (from memory: generators are about
 * 4 to 5 cm across; leads are not counted). */
#define SL_POINT_REACH_DEVICE_CM 3.0
/* A fetus given as a point: half the fundal height, which in cm about
 * equals the weeks of gestation from 20 weeks on (McDonald's rule, common
 * obstetric practice), and at least this (the uterus within the pelvis). */
#define SL_POINT_REACH_FETUS_MIN_CM 5.0

typedef struct sl_estimate_options {
    const sl_model *model;
    sl_eval_mode mode;
    double prescription_isodose;  /* fraction (0.9 for 90 %), NAN when not given */
    double reference_dose_cgy;    /* per fraction, every beam; NAN: computed */
    double setup_shift_cm;        /* standard uncertainty of distances (default 0.5) */
    const char *insert;           /* model insert for every cutout; NULL: from block names */
    const sl_shield *shields;
    size_t nshields;
    bool include_targets;         /* estimate PTV / CTV / GTV ROIs too */
    int threads;
    const sl_rtdose *const *tps;  /* the planning system's doses (borrowed); NULL: none */
    size_t ntps;
    double tps_zone_cm;           /* the seam (default SL_TPS_ZONE_CM) */
    const sl_point_reach *reach;  /* point organs' reach (borrowed); NULL: none */
    size_t nreach;
} sl_estimate_options;

/* The planning system's dose is used within this distance of a field edge
 * (cm): electron dose algorithms are commissioned in and near the field and
 * underestimate farther out (common practice; the ratio table of each
 * estimate shows it for the clinic's own system). */
#define SL_TPS_ZONE_CM 3.0
/* Standard uncertainty (k = 1) given to a planning-system dose, as a
 * fraction of it (from memory: a few per cent near the field edge is the
 * usual tolerance of electron dose calculation; a stated value, not a
 * measured one). */
#define SL_TPS_U_FRACTION 0.05
/* The comparison band beyond the field edges (cm), in 1 cm bins. */
#define SL_TPS_BAND_CM 5.0
#define SL_TPS_BINS 5

/* One bin of the comparison: model / planning system over the course. */
typedef struct sl_tps_ratio {
    int beam_number;              /* 0: every beam together */
    double lo_cm, hi_cm;          /* distance from the nearest field edge */
    size_t n;                     /* samples with both doses */
    double mean, min, max;        /* of the ratio model / planning system */
} sl_tps_ratio;

void sl_estimate_default_options(sl_estimate_options *o);

struct sl_beam_dose;
/* The model's value for one beam at a query (whose tilt and SSD the caller
 * sets), with the conservative rule at an uncommissioned extended SSD: the
 * SSD component is widened so that the upper bound (k = 2) never reads
 * below the estimate at the nominal SSD. */
void sl_beam_eval(const struct sl_beam_dose *bd, const sl_eval_query *q, sl_model_value *v);

typedef struct sl_beam_dose {
    const sl_beam_place *place;
    double energy_mev;
    const char *applicator;
    char *insert;                 /* model insert used: "open" or an insert id */
    bool cutout;                  /* the plan has a cutout */
    unsigned model_flags;         /* SL_MF_OPEN_FOR_CUTOUT when open profiles stand in */
    double dose_per_mu_cgy, dmax_cm, effective_ssd_cm;
    double ssd_used_cm;           /* the SSD the profiles are read at: the plan's, or the
                                     body's when more than 1 cm longer (or when the plan
                                     gives none); NAN when neither gives one */
    double gap_cm;                /* ssd_used - nominal SSD */
    double isf;                   /* inverse-square factor (from the SSD of the output used) */
    double isf_ssd_cm;            /* the SSD the inverse square runs to: the plan's, or the
                                     body's when more than 1 cm shorter than the plan's */
    bool body_nearer, body_farther; /* the body's SSD more than 1 cm from the plan's: each
                                     factor takes the SSD that gives it the higher value */
    double output_ssd_cm;         /* SSD of the output used: the nominal one, or the nearest
                                     measured one when the model has outputs per SSD */
    double nominal_ratio;         /* reference dose at the nominal SSD / the one used */
    double cutout_factor;
    bool cutout_factor_assumed;   /* no factor in the model: 1 used */
    double cutout_inset_cm;       /* deepest point of the cutout inside the applicator's
                                     opening (isocentric plane); NAN when unknown */
    double cutout_area_cm2;       /* the plan's cutout at the nominal SSD; NAN without one */
    double cutout_eqsq_cm;        /* its equivalent square, 4 area / perimeter */
    bool reference_overridden;
    /* the reference dose raised to what the plan's own Beam Dose (or, for a
     * plan's electron beams together, its prescription) implies, when that
     * is higher than MU x output by more than SL_BEAM_DOSE_RAISE_ABOVE: the
     * ratio taken */
    double reference_raised_by;   /* 1 when not raised */
    const char *reference_raised_from; /* "Beam Dose" or "prescription"; NULL */
    double *mu;                   /* per fraction group (NAN: beam not in that group) */
    double *ref_cgy;              /* reference dose per fraction, per group (NAN likewise) */
    double *plan_beam_dose_cgy;   /* Beam Dose of the plan, per group (NAN when absent) */
    sl_curve_set *curves;
    bool uses_direction;          /* the curves tell directions apart (sl_curves_use_direction) */
} sl_beam_dose;

/* Organs closer than this to the field edge (cm) are estimated but marked
 * SL_MF_NEAR_EDGE and not judged against action levels: within about a
 * centimetre of the edge the penumbra and the patient's own scatter, which
 * the planning system models, dominate (common practice). */
#define SL_NEAR_EDGE_CM 1.0

/* A plan's cutout matches a model insert when their areas and equivalent
 * squares differ by no more than this fraction (common practice: output
 * factors change by a few per cent for such a change of field size). */
#define SL_INSERT_MATCH_TOLERANCE 0.15

/* The uncertainty budget of one dose (cGy, standard uncertainties, k = 1). */
typedef struct sl_budget {
    double fit_cgy, measurement_cgy, interpolation_cgy, extrapolation_cgy;
    double standin_cgy, transfer_cgy, setup_cgy;
    double uncommissioned_cgy;    /* tilt or SSD beyond the commissioned ones */
    double combined_cgy;          /* the components in quadrature (beams add linearly) */
} sl_budget;

typedef struct sl_dose_stat {
    double cgy;       /* estimate */
    double u_cgy;     /* standard uncertainty (k = 1) */
    double upper_cgy; /* estimate + 2 u */
} sl_dose_stat;

typedef struct sl_organ_dose {
    size_t organ;                 /* index into the location's organs */
    const sl_roi *roi;
    bool estimated;               /* false for excluded types (targets...) and in field */
    const char *excluded_why;     /* why not estimated (NULL when estimated) */
    bool in_field;
    bool placed;                  /* every sample placed for every beam */
    double volume_cc;
    bool is_point;
    double point_reach_cm;        /* a point's reach toward the fields (sl_point_reach); 0:
                                     none */
    double min_distance_cm;       /* over beams */
    double min_depth_cm, max_depth_cm;
    double nearmax_volume_cc;
    size_t ngroups;
    sl_dose_stat *fx_max, *fx_mean, *fx_nearmax, *fx_nearest; /* per fraction, per group */
    sl_dose_stat course_max, course_mean, course_nearmax, course_nearest;
    size_t max_sample, nearest_sample;
    double electron_fraction;     /* of the course dose at the hottest sample */
    double max_energy_mev;        /* highest energy among the beams that reach it */
    unsigned flags;               /* SL_MF_* met at any sample */
    unsigned nearest_flags;       /* SL_MF_* at the sample nearest the field edge */
    double nearest_depth_cm;      /* that sample's depth, for the beam nearest it (NAN: none) */
    double shield_transmission;   /* what-if transmission applied (1 for none) */
    bool near_edge;               /* min_distance_cm < SL_NEAR_EDGE_CM: marked, not judged */
    sl_budget course_max_budget;  /* the budget at the hottest sample, over the course */
    bool upper_elsewhere;         /* the course maximum's upper bound is another sample's,
                                     higher than the hottest sample's own */
    sl_budget course_nearest_budget; /* the same at the sample nearest the field edge */
    double *course_cgy;           /* per sample, for dose-volume histograms */
    bool landmark;                /* geometry measured on the patient (--landmark): not in
                                     the location's organs (organ is SIZE_MAX) */
    /* with the planning system's dose (all 0 without) */
    size_t tps_samples;           /* samples whose dose is the planning system's */
    size_t tps_outside_grid;      /* samples in the zone outside its grid: the model's dose */
    size_t tps_below_model;       /* samples in the zone, outside the field, where the
                                     planning system's dose is below the model's: the
                                     model's dose, with its marks */
    size_t tps_far_model;         /* samples whose planning-system dose was taken near one
                                     field with the model's dose of the fields whose edges
                                     lie beyond the zone added to it */
    double tps_volume_fraction;   /* of the volume (of the samples, for points) */
    bool max_from_tps, nearest_from_tps;
    double *tps_acc;              /* private: the organ's share of the ratio table */
} sl_organ_dose;

typedef struct sl_estimate {
    const sl_plan *plan;
    const sl_structure_set *ss;
    const sl_location *loc;
    const sl_model *model;
    sl_estimate_options opt;
    size_t ngroups;
    int *fractions;               /* per group */
    size_t nbeams;
    sl_beam_dose *beams;          /* one per placed beam, same order as loc->beams */
    size_t norgans;
    sl_organ_dose *organs;        /* one per organ of the location */
    bool tps_used;                /* the planning system's dose was combined */
    bool tps_low;                 /* it reads low at a beam's reference point: its doses in
                                     the fields are not used (the organs there not judged) */
    double tps_zone_cm;
    size_t nratios;
    sl_tps_ratio *ratios;         /* rows with samples only */
    sl_notes notes;
} sl_estimate;

sl_status sl_estimate_doses(const sl_plan *plan, const sl_structure_set *ss,
                            const sl_location *loc, const sl_estimate_options *opt,
                            sl_estimate **out, sl_error *err);
void sl_estimate_free(sl_estimate *e);

/* The near-maximum's sample: the index at which the hottest of n samples
 * (hotter first, then the earlier index), their volumes (cc) summed in that
 * order, first hold `volume` cc; the coldest when they never do. With
 * volume_cc NULL (a point) the sums are 0: the hottest for a volume of 0 or
 * less. n == 0 gives 0. scratch: room for 2 n doubles. */
size_t sl_dose_nearmax_sample(const double *dose, const double *volume_cc, size_t n,
                              double volume, double *scratch);

/* An organ outside the scanned volume, measured on the patient: its
 * distance from the nearest field edge along the body surface and its depth
 * (cm). Every beam is evaluated at that distance and depth (the cautious
 * reading: the nearest edge of each field), with the model's uncertainty and
 * the setup shift as at a sample. The organ is appended to e->organs as a
 * point (landmark true); roi must outlive the estimate. */
sl_status sl_estimate_add_landmark(sl_estimate *e, const sl_roi *roi, double distance_cm,
                                   double depth_cm, sl_error *err);

/* The estimate on an axial grid over the body contour (its EXTERNAL ROI):
 * voxel centres at whole multiples of step_cm, inside the body only (0
 * outside). Each voxel gets the course dose of every placed beam as an organ
 * sample there would (the model at its depth and distances, without the
 * setup shift or what-if shields), or within the zone the planning
 * system's dose when one is given; a voxel inside a field without it is 0
 * and counted. Input errors: no EXTERNAL ROI, a grid of more than
 * SL_RTDOSE_MAX_VOXELS. */
sl_status sl_estimate_grid(const sl_estimate *e, double step_cm, sl_dose_grid **out,
                           sl_error *err);

/* Is a ROI of this RT ROI Interpreted Type left out unless asked for? */
bool sl_dose_type_excluded(const char *type, bool include_targets, const char **why);

/* Is this RT ROI Interpreted Type a target volume (PTV, CTV, GTV, treated or
 * irradiated volume)? */
bool sl_dose_type_target(const char *type);

#ifdef __cplusplus
}
#endif

#endif
