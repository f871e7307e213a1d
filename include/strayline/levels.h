/*
 * strayline: organ kinds, action levels and their published sources.
 *
 * An action-level table (YAML; the shipped one is models/action-levels.yaml,
 * documented in models/README.md) names organ kinds (lens, cardiac device,
 * fetus, ...), the ROI-name patterns that identify them (case-insensitive
 * shell patterns a clinic can edit), and for each kind its levels or risk
 * bands, every one with its source and how sure that source is
 * ("published", "secondary", "from memory", "common practice"). Levels are
 * screening levels for a whole course, not prescriptions.
 */
#ifndef STRAYLINE_LEVELS_H
#define STRAYLINE_LEVELS_H

#include <stdbool.h>
#include <stddef.h>

#include "strayline/dose.h"
#include "strayline/error.h"

#ifdef __cplusplus
extern "C" {
#endif

#define SL_LEVELS_FORMAT "strayline-action-levels"

typedef struct sl_level {
    char *name;           /* "threshold for vision-impairing cataract" */
    double dose_gy;       /* course dose at which the level applies */
    double weeks_from, weeks_to; /* weeks after conception it applies to (fetus), NAN: always */
    bool single_exposure; /* a single-exposure threshold compared with a course (exposure: single) */
    bool fractionated;    /* given for a fractionated course (exposure: fractionated) */
    char *source;
    char *mark;           /* published | secondary | from memory | common practice */
} sl_level;

typedef struct sl_band {
    char *name;           /* "low", "medium", "high" */
    double below_gy;      /* upper edge of the band; INFINITY for the last */
} sl_band;

typedef struct sl_statement {
    char *text;           /* a risk statement or caution for this kind */
    double weeks_from, weeks_to; /* weeks after conception, NAN: always */
    double ages_from, ages_to;   /* patient's age in years [from, to), NAN: always */
    double per_gy;        /* a risk per Gy that the report multiplies by the dose, NAN: none */
    char *source;
    char *mark;
} sl_statement;

typedef struct sl_kind {
    char *kind;           /* "lens", "cardiac_device", "fetus", ... */
    char *description;
    size_t npatterns;
    char **patterns;      /* case-insensitive shell patterns on ROI names */
    size_t nlevels;
    sl_level *levels;
    size_t nbands;        /* risk bands instead of levels (cardiac devices) */
    sl_band *bands;
    char *bands_source, *bands_mark;
    int pacing_shift;     /* bands to move up for a pacing-dependent patient */
    int pacing_min_band;  /* lowest band of a pacing-dependent patient, -1: none */
    int neutron_band;     /* lowest band when a beam may produce neutrons, -1: none */
    size_t nstatements;
    sl_statement *statements;
    bool stochastic;      /* the report gives a stochastic-risk note (thyroid, breast) */
    char *lar_table;      /* name of the lifetime-risk table, or NULL */
} sl_kind;

/* A lifetime-attributable-risk table: cases per 100,000 exposed to 0.1 Gy,
 * by age at exposure, for each sex. */
typedef struct sl_lar_table {
    char *name;
    char *source;
    char *mark;
    size_t nages;
    double *ages;
    double *male;         /* NAN where the table has no entry (breast, male) */
    double *female;
} sl_lar_table;

typedef struct sl_levels {
    char *source;
    char sha256[65];
    char *notice;
    size_t nkinds;
    sl_kind *kinds;
    size_t ntables;
    sl_lar_table *tables;
} sl_levels;

sl_status sl_levels_load(const char *path, sl_levels **out, sl_error *err);
sl_status sl_levels_load_buffer(const char *data, size_t size, const char *name,
                                sl_levels **out, sl_error *err);
void sl_levels_free(sl_levels *l);

/* The kind whose patterns match a ROI name (the first in the table), or NULL. */
const sl_kind *sl_levels_match(const sl_levels *l, const char *roi_name);
const sl_kind *sl_levels_kind(const sl_levels *l, const char *kind);
const sl_lar_table *sl_levels_table(const sl_levels *l, const char *name);

/* Does a level or statement apply at a number of weeks after conception
 * (NAN for none given)? One without a week range always applies. The
 * range is half-open: [from, to). */
bool sl_level_applies(double from, double to, double weeks);

/* Gestational age (weeks since the last menstrual period, the clinical
 * convention) to weeks after conception, the count of ICRP Publication 84:
 * about 2 weeks less (obstetric convention, common practice); never below 0. */
#define SL_LMP_TO_CONCEPTION_WEEKS 2.0
double sl_weeks_after_conception(double gestational_weeks);

/* Age in whole years on a date from a birth date, both DICOM DA strings
 * (YYYYMMDD); false when either is absent or not a valid date, or the birth
 * date is after the date. */
bool sl_age_on(const char *birth_da, const char *date_da, double *years);

/* Lifetime attributable risk (cases per 100,000) for a dose (Gy) at an age
 * (years), interpolating the table linearly in age; NAN when the sex has no
 * entry or the age lies outside the table. sex: 'M' or 'F'. */
double sl_lar_cases(const sl_lar_table *t, char sex, double age_years, double dose_gy);

/* ---------------------------------------------- statuses and advice -- */

typedef enum sl_status_kind {
    SL_ST_BELOW,        /* the estimate and its upper bound stay below the level */
    SL_ST_MAY_EXCEED,   /* the upper bound (k = 2) reaches the level */
    SL_ST_EXCEEDS,      /* the estimate reaches the level */
    SL_ST_BAND,         /* a risk band (cardiac devices): see band */
    SL_ST_NO_LEVEL,     /* no action level for this ROI (stochastic note or unmatched) */
    SL_ST_IN_FIELD,     /* in or touching the field: the planning system's dose applies */
    SL_ST_NOT_ASSESSED  /* not placed, or beyond the model's range */
} sl_status_kind;

const char *sl_status_text(sl_status_kind s);

/* Does a status call for attention (exit code 4)? */
bool sl_status_flagged(sl_status_kind s, int band, size_t nbands);

/* Lead thickness (mm) that stops electrons of energy E (MeV): E/2 mm
 * (Radiother Oncol 80:391, 2006) plus a 1 mm margin (textbook rule). */
double sl_lead_mm(double energy_mev);
/* Low-melting-point alloy equivalent: about 1.2 times the lead (from memory). */
double sl_alloy_mm(double energy_mev);

/* ----------------------------------------------------- assessment -- */

/* What the report needs to know of the patient. */
typedef struct sl_patient {
    double gestational_weeks; /* since the last menstrual period; NAN when not given */
    bool pacing_dependent;    /* given so (false when not stated: see pacing_stated) */
    bool pacing_stated;       /* pacing dependence given either way; when not, a cardiac
                                 device is judged as for a pacing-dependent patient */
    double age_years;         /* NAN when not given */
    char sex;                 /* 'M', 'F' or 0 */
    double conception_weeks;  /* weeks after conception (ICRP 84 windows); NAN when not
                                 pregnant; from --weeks-after-conception or the
                                 gestational age less 2 weeks */
    bool conception_given;    /* given as weeks after conception, not converted */
    const char *age_from;     /* "option", "DICOM (birth date and plan date)" or NULL */
    const char *sex_from;     /* "option", "DICOM" or NULL */
    bool device_asked;        /* a device option was given (--pacing-dependent ...) */
    double fetus_rise_cm;     /* what-if rise of the fetus toward the diaphragm, 0: none */
    bool age_unknown_unjudged;/* a batch (scan, listen): a fetus without a gestational age
                                 is left not judged and flagged, not refused */
} sl_patient;

/* A patient with nothing known. */
void sl_patient_init(sl_patient *p);

/* A treatment beam of the plan that this tool does not estimate (photons,
 * protons, ...): listed in every report, its organs marked incomplete. */
typedef struct sl_other_beam {
    int number;
    const char *name;
    const char *radiation_type;
    double energy;            /* nominal, MV or MeV as the plan gives it; NAN */
    double mu;                /* Beam Meterset per fraction, summed over groups; NAN */
    int fractions;            /* over the groups that hold it; -1 unknown */
    bool neutron_producing;   /* photons of 10 MV or more, or energy unknown */
} sl_other_beam;

/* A dose from elsewhere (another beam, a previous course) given by option
 * and added to an organ's course dose before it is judged. */
typedef struct sl_other_dose {
    const char *roi;
    double cgy;
} sl_other_dose;

/* A ROI given a kind on the command line (--organ "ROI=KIND"). */
typedef struct sl_organ_map {
    const char *roi;
    const char *kind;
} sl_organ_map;

typedef struct sl_level_check {
    const sl_level *level;
    bool exceeded;        /* the estimate reaches it */
    bool upper_exceeded;  /* the upper bound (k = 2) reaches it */
} sl_level_check;

typedef struct sl_assessment {
    const sl_organ_dose *dose;
    const sl_kind *kind;      /* NULL: no kind matched */
    bool kind_by_option;
    sl_status_kind status;
    const char *not_assessed_why;
    const sl_level *governing;/* the lowest applicable level */
    size_t nchecks;
    sl_level_check *checks;   /* every applicable level */
    int band, band_upper;     /* risk band by the estimate and by the upper bound; -1: none */
    bool flagged;             /* needs attention: exit code 4 */
    bool unjudged;            /* has levels (or kind_unknown), and this screening could not
                                 judge it */
    bool unjudged_unknown;    /* unjudged, in or touching the field or with no place:
                                 its dose is the treatment's or unknown (flagged) */
    double unjudged_level_gy; /* unjudged, and the value shown or its upper bound reaches
                                 this level (its lowest that applies); 0 otherwise */
    bool type_not_organ;      /* unjudged, typed as no organ (FIXATION, SUPPORT, ...) while its
                                 name gives it a kind: a mask named "Device", or a device
                                 mistyped */
    bool kind_unknown;        /* no kind matches its name and its upper bound reaches the
                                 table's lowest level: unjudged, flagged (an embryo or a
                                 device in a spelling the table lacks) */
    bool shield_advised;
    double lead_mm, alloy_mm, shield_energy_mev;
    bool photon_dominated;
    bool measurement_advised;
    double lar_cases;         /* per 100,000, from the mean course dose; NAN when not given */
    double lar_mean_cgy;      /* the mean course dose it is from: the estimate's mean plus
                                 any --other-dose (taken as spread over the organ), cGy */
    const sl_lar_table *lar;
    sl_notes advice;          /* each line with its source */
    sl_notes statements;      /* the kind's statements that apply, with sources */
    bool incomplete;          /* has levels, and the plan has beams this tool does not
                                 estimate: "incomplete: other beams not included" */
    double other_cgy;         /* dose added by --other-dose (course), 0: none */
    bool neutron_band;        /* the band was raised for a possibly neutron-producing beam */
    bool neutron_unrated;     /* such a beam exists and the table has no neutron rule */
    bool pacing_raised;       /* the band was raised for pacing dependence */
    bool pacing_assumed;      /* ... which was not stated: assumed (the higher band) */
    bool verdict;             /* statements.items[0] is the verdict (fetus): printed first */
} sl_assessment;

typedef struct sl_assessments {
    const sl_levels *levels;
    sl_patient patient;
    size_t n;
    sl_assessment *items;     /* one per organ of the estimate */
    bool any_flagged;
    size_t n_unjudged;        /* organs with levels that were not judged (in the field,
                                 beyond the model's range or not placed), and those of no
                                 kind that reach the table's lowest level */
    size_t nother;
    sl_other_beam *other;     /* treatment beams not estimated by this tool */
    size_t n_incomplete;      /* organs with levels marked incomplete */
    bool neutrons;            /* a beam of the plan may produce neutrons */
    size_t n_measure;         /* organs for which in-vivo measurement is advised (these
                                 set any_flagged too: the screening cannot settle them) */
    sl_notes missing;         /* asked-for organs that are absent ("not assessed: no fetus
                                 found ...") */
    sl_notes notes;
} sl_assessments;

/* Give every estimated organ its kind, status and advice. Usage errors: a
 * mapping that names no ROI or no kind, a fetus without a gestational age. */
/* The reason an estimated organ of no kind is not judged (its
 * not_assessed_why when nothing else left it unjudged). */
extern const char sl_kind_unknown_why[];

sl_status sl_assess(const sl_levels *levels, const sl_estimate *est, const sl_patient *patient,
                    const sl_organ_map *map, size_t nmap, sl_assessments **out, sl_error *err);
/* The same with doses from elsewhere added to organs (--other-dose). */
sl_status sl_assess_with(const sl_levels *levels, const sl_estimate *est,
                         const sl_patient *patient, const sl_organ_map *map, size_t nmap,
                         const sl_other_dose *other, size_t nother, sl_assessments **out,
                         sl_error *err);
void sl_assessments_free(sl_assessments *a);

/* Beyond this multiple of the measured distance range an organ is "not
 * assessed: beyond the model's range" (its extrapolated dose is still shown). */
#define SL_BEYOND_RANGE_FACTOR 1.5

#ifdef __cplusplus
}
#endif

#endif
