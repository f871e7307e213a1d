/*
 * strayline: in-vivo readings against the estimate.
 *
 * Every report tells the user to confirm high values by measurement; this
 * module takes the measurement back. A readings file (YAML, documented in
 * README.md) names the plan, the dosimeter's position (the nearest point of
 * a ROI, a point in patient coordinates, or a landmark measured on the
 * patient), the fractions it stayed on for, the detector, the reading and
 * the energy correction applied. Each reading is estimated again at that
 * position for those fractions (sl_screen_run, as `estimate` does), and the
 * reading, the estimate, both uncertainties and the log ratio go into the
 * screening log. Over many readings the log gives, per machine, energy,
 * applicator and distance band, the clinic's own bias and spread: the honest
 * source of a model's transfer uncertainty, which `propose` writes into a
 * new model version (never silently into the old one).
 */
#ifndef STRAYLINE_INVIVO_H
#define STRAYLINE_INVIVO_H

#include <stdbool.h>
#include <stddef.h>
#include <stdio.h>

#include "strayline/dose.h"
#include "strayline/error.h"
#include "strayline/levels.h"
#include "strayline/model.h"
#include "strayline/report.h"
#include "strayline/screenlog.h"

#ifdef __cplusplus
extern "C" {
#endif

#define SL_INVIVO_FORMAT "strayline-invivo-readings"
#define SL_INVIVO_FORMAT_VERSION 1

/* Standard uncertainty (k = 1, relative) of a reading at reference
 * conditions: TLD 1.3 %, OSL 1.6 % (Alvarez, Kry et al., Radiat Meas 2017).
 * No published figure is kept for diodes: a diode reading states its own. */
#define SL_INVIVO_U_TLD 0.013
#define SL_INVIVO_U_OSL 0.016
/* Out of field an OSL reader needs an energy correction of 0.69 to 0.95
 * (Scarboro et al. 2012): an uncorrected reading can be 5 to 45 % high. */
#define SL_INVIVO_OSL_CORR_LO 0.69
#define SL_INVIVO_OSL_CORR_HI 0.95
/* A reading is flagged when its log ratio lies more than this many combined
 * standard uncertainties from 0. */
#define SL_INVIVO_K 2.0

typedef enum sl_position_kind {
    SL_POS_ROI,       /* the ROI's point nearest the field edge */
    SL_POS_POINT,     /* a point in patient coordinates */
    SL_POS_LANDMARK   /* distance from the field edge and depth measured on the patient */
} sl_position_kind;

typedef struct sl_reading {
    char *id;                 /* the user's label, unique within the file */
    char *patient_id;
    char *plan_uid;           /* NULL: taken from the plan file */
    char *plan_path, *ss_path;/* resolved against the readings file's folder; may be NULL */
    char *date;               /* YYYY-MM-DD the dosimeter was read */
    sl_position_kind pos;
    char *roi;                /* SL_POS_ROI: the ROI; otherwise the point's name */
    char *kind;               /* organ kind of a point or landmark */
    double point_mm[3];       /* SL_POS_POINT */
    double distance_cm, depth_cm; /* SL_POS_LANDMARK */
    int fractions;            /* fractions the dosimeter stayed on for */
    int fraction_group;       /* Fraction Group Number; 0: the plan's only one */
    char *detector;           /* TLD, OSL or diode */
    double reading_cgy;       /* by the dosimeter's calibration, before the energy correction */
    double energy_correction; /* factor applied once; NAN: none given */
    double u_detector;        /* relative, k = 1 (detector's reference value or stated) */
    double u_added;           /* relative, k = 1, what the user adds (0 when none) */
    int line;                 /* line of the reading in the file */
} sl_reading;

typedef struct sl_readings {
    char *path;
    char *notice;             /* e.g. the invented-data notice; may be NULL */
    size_t n;
    sl_reading *r;
} sl_readings;

sl_status sl_readings_load(const char *path, sl_readings **out, sl_error *err);
void sl_readings_free(sl_readings *r);

/* One reading set beside its estimate. */
typedef struct sl_invivo_result {
    const sl_reading *reading;
    char *plan_uid, *structure_set_uid, *patient_id, *plan_label;
    char *machine, *energy, *applicator; /* energy "9" or "6/9" when beams differ (MeV) */
    double energy_mev;        /* NAN when the beams differ */
    double distance_cm, depth_cm;
    int planned_fractions;
    double measured_cgy;      /* reading x energy correction */
    double u_measured_cgy;
    double estimate_cgy;      /* per-fraction estimate x fractions measured */
    double u_estimate_cgy;    /* k = 1 */
    double u_transfer_cgy;    /* the transfer part of it */
    sl_budget budget;         /* the estimate's budget at the point (cGy, k = 1): the
                                 course budget at the sample nearest the field edge times
                                 estimate / course dose there (exact for one fraction group,
                                 a proportional share for several) */
    double log_ratio;         /* ln(measured / estimate) */
    double u_log_ratio;       /* combined relative uncertainties in quadrature */
    bool flagged;             /* |log ratio| > SL_INVIVO_K u */
    unsigned model_flags;     /* SL_MF_* at the position */
    char check[1024];         /* what to check when flagged; empty otherwise */
    sl_notes notes;           /* warnings (no energy correction, outside the model's range) */
} sl_invivo_result;

/* Estimate one reading (reads the plan and structure set, runs the screen).
 * The model and levels are borrowed. */
sl_status sl_invivo_estimate(const sl_reading *rd, const sl_model *model, const sl_levels *levels,
                             const char *levels_path, sl_invivo_result *out, sl_error *err);
void sl_invivo_result_free(sl_invivo_result *r);

/* The log side (src/log/screenlog.c). */
typedef struct sl_log_reading {
    long long id;
    char *added_at, *reading_id, *readings_file, *date;
    char *patient_id, *plan_uid, *structure_set_uid, *plan_label;
    long long screening_id;   /* latest screening of the plan in the log; 0: none */
    char *position, *detector;
    char *machine, *energy, *applicator;
    double energy_mev;
    double distance_cm, depth_cm;
    int fractions, planned_fractions;
    double reading_cgy, energy_correction, measured_cgy, u_measured_cgy;
    double estimate_cgy, u_estimate_cgy, u_transfer_cgy, log_ratio, u_log_ratio;
    sl_budget budget;         /* as recorded (transfer_cgy equals u_transfer_cgy) */
    bool flagged;
    unsigned model_flags;
    char *check, *model_file, *model_version, *model_sha256;
} sl_log_reading;

typedef struct sl_log_readings {
    size_t n;
    sl_log_reading *r;        /* in order of recording */
} sl_log_readings;

/* Latest screening of a plan in the log (0 when none). */
sl_status sl_screenlog_plan_screening(sl_screenlog *log, const char *plan_uid, long long *id,
                                      char **when, sl_error *err);
/* Is this reading (patient, plan, reading id) in the log already? */
sl_status sl_screenlog_reading_exists(sl_screenlog *log, const char *patient_id,
                                      const char *plan_uid, const char *reading_id,
                                      char **added_at, sl_error *err);
sl_status sl_screenlog_add_reading(sl_screenlog *log, const sl_invivo_result *r,
                                   const char *readings_file, const sl_model *model,
                                   long long screening_id, long long *id, sl_error *err);
/* Every reading (machine NULL: every machine). */
sl_status sl_screenlog_readings(sl_screenlog *log, const char *machine, sl_log_readings **out,
                                sl_error *err);
void sl_log_readings_free(sl_log_readings *r);
/* Keep only the readings that were compared with the model of this SHA-256:
 * a reading's ratio measured/estimated holds for the model it was added
 * against, not for another version. Returns how many were left out;
 * *versions (when given) receives their model versions, ", " between them
 * (allocated; NULL when none left out or out of memory). */
size_t sl_log_readings_keep_model(sl_log_readings *rs, const char *sha256, char **versions);

/* ------------------------------------------------------ statistics -- */

/* One group of readings: machine, energy, applicator and distance band. */
typedef struct sl_invivo_group {
    char *machine, *energy, *applicator;
    double band_lo_cm, band_hi_cm;      /* hi INFINITY for the last band */
    size_t n;
    size_t *idx;                        /* into the readings */
    double mean_log_ratio;              /* measured / estimated */
    double sd_log_ratio;                /* NAN for n < 2 */
    double ci_lo, ci_hi;                /* 95 % confidence interval of the mean (t) */
    double sd_lo, sd_hi;                /* 95 % interval of the spread (chi-square) */
    double t, p_bias;                   /* t test of mean = 0 (two-sided) */
    double chi2, p_spread;              /* sum ((r - mean) / u)^2 on n - 1 degrees of freedom */
    double extra_sd;                    /* spread beyond the stated uncertainties (>= 0) */
    size_t noutliers;
} sl_invivo_group;

typedef struct sl_invivo_stats {
    size_t ngroups;
    sl_invivo_group *groups;
    size_t nbands;
    double *band_edges;                 /* below_cm of each band (INFINITY last) */
    char *first_date, *last_date;
} sl_invivo_stats;

/* Group the readings by machine, energy, applicator and the bands of t
 * (the model's transfer bands, or the built-in ones). */
sl_status sl_invivo_statistics(const sl_log_readings *r, const sl_transfer *t,
                               sl_invivo_stats **out, sl_error *err);
void sl_invivo_stats_free(sl_invivo_stats *s);

/* `invivo report` in text or JSON (src/report/invivo.c). */
typedef struct sl_invivo_report {
    const char *log_path;
    const sl_log_readings *readings;
    const sl_invivo_stats *stats;
    const sl_model *model;              /* may be NULL */
} sl_invivo_report;
sl_status sl_report_invivo(FILE *fp, sl_format fmt, const sl_invivo_report *r, sl_error *err);
/* The same with its plot (measured / estimated against distance), as HTML
 * (libxml2, inline SVG) or PDF bytes (caller frees *pdf); paper "a4" or
 * "letter" (src/report/invivo_html.c). */
sl_status sl_report_invivo_html(FILE *fp, const sl_invivo_report *r, sl_error *err);
sl_status sl_report_invivo_pdf(const sl_invivo_report *r, const char *paper,
                               unsigned char **pdf, size_t *len, sl_error *err);

/* ---------------------------------------------------------- propose -- */

/* Fewer readings than this in a band: the band keeps the model's value. */
#define SL_INVIVO_MIN_BAND 5
/* The least transfer band a proposal sets: readings that state a larger
 * uncertainty than they scatter would cancel the band to 0, and the upper
 * bounds with it (found by an independent review). The value at which
 * `fit` warns of a band too small (SL_TRANSFER_WARN_BELOW, a strayline
 * setting). */
#define SL_INVIVO_BAND_FLOOR 0.1

typedef struct sl_invivo_proposal {
    size_t nbands;
    double *old_rel, *new_rel;          /* per band of the model's transfer uncertainty */
    size_t *n;                          /* readings in each band */
    double *rms;                        /* root mean square log ratio in each band */
    double *u_other;                    /* RMS of the readings' own relative uncertainties */
    double *upper;                      /* 95 % upper bound of the spread (chi-square, n dof) */
    bool *floored;                      /* new_rel raised to SL_INVIVO_BAND_FLOOR */
    size_t nreadings;
    char *first_date, *last_date;
} sl_invivo_proposal;

/* The new transfer bands for model m's machine from the readings: in each
 * band with at least SL_INVIVO_MIN_BAND readings, the 95 % upper bound of
 * the RMS log ratio about 0 (chi-square on n degrees of freedom), less the
 * readings' own uncertainties in quadrature (the model's other components
 * stay in: the value errs high); fewer readings keep the model's value. */
sl_status sl_invivo_propose(const sl_model *m, const sl_log_readings *r,
                            sl_invivo_proposal **out, sl_error *err);
void sl_invivo_proposal_free(sl_invivo_proposal *p);

/* propose --scale: a scale factor per energy and applicator, all distance
 * bands together. A group gets one only when its bias is significant (the
 * report's two-sided t test of mean log ratio = 0 below SL_INVIVO_SCALE_P),
 * it has at least SL_INVIVO_MIN_BAND readings, its readings share one
 * energy, the factor exp(mean) lies within SL_SCALE_MIN..SL_SCALE_MAX, the
 * energy and applicator are commissioned and the model has no scale for it
 * yet (readings compared with an unscaled model only); `why` says which
 * rule left a group out. */
#define SL_INVIVO_SCALE_P 0.05
/* ... and readings from at least this many plans; readings whose point
 * rests on a stand-in, an extrapolation or the near-edge zone (where the
 * model errs high on purpose) are left out of the scale altogether (a
 * strayline setting). */
#define SL_INVIVO_MIN_PATIENTS 3
#define SL_INVIVO_SCALE_EXCLUDED (SL_MF_OPEN_FOR_CUTOUT | SL_MF_EXTRAPOLATED | SL_MF_NEAR_EDGE)
typedef struct sl_invivo_scale_choice {
    char *energy, *applicator;
    double energy_mev;                  /* NAN when the readings' energies differ */
    size_t n;                           /* readings used (the excluded ones aside) */
    size_t npatients;                   /* distinct patients among them (Patient ID) */
    double mean_log_ratio, ci_lo, ci_hi, p_bias;
    char *first_date, *last_date;
    bool take;
    char why[256];                      /* empty when taken */
} sl_invivo_scale_choice;

typedef struct sl_invivo_scales {
    size_t n;
    sl_invivo_scale_choice *c;
} sl_invivo_scales;

sl_status sl_invivo_propose_scales(const sl_model *m, const sl_log_readings *r,
                                   sl_invivo_scales **out, sl_error *err);
void sl_invivo_scales_free(sl_invivo_scales *s);

#ifdef __cplusplus
}
#endif

#endif
