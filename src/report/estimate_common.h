/*
 * Private helpers shared by the estimate writers (text, JSON, CSV, HTML), so
 * that every output says the same cautions and names flags the same way.
 */
#ifndef STRAYLINE_REPORT_ESTIMATE_COMMON_H
#define STRAYLINE_REPORT_ESTIMATE_COMMON_H

#include "strayline/report.h"

#define EST_MAX_CAUTIONS 14
#define EST_CAUTION_LEN 600

/* The cautions every output carries, in order. */
size_t est_cautions(const sl_estimate_report *r, char out[][EST_CAUTION_LEN], size_t max);

/* The SL_MF_* flags, in a fixed order, with their JSON names. */
extern const unsigned est_flags[];
extern const char *const est_flag_names[];
#define EST_NFLAGS 11

/* An organ's marks, " [extrapolated] [depth] ...", short or spelled out. */
void est_marks(const sl_organ_dose *d, bool verbose, char *buf, size_t size);
/* What every short mark means, in one line. */
const char *est_marks_legend(void);

/* The names and values of an uncertainty budget's components, in order. */
#define EST_NBUDGET 9
extern const char *const est_budget_names[EST_NBUDGET];
void est_budget_values(const sl_budget *b, double out[EST_NBUDGET]);

/* Every warning of the inputs and stages, in one list (caller frees). */
void est_warnings(const sl_estimate_report *r, sl_notes *out);

/* Text of an organ's status, with its band for cardiac devices. */
void est_status_text(const sl_assessment *a, char *buf, size_t size);

/* Status qualifiers every format shows: "; single-exposure threshold; ...",
 * "; incomplete: other beams not included", "; includes N cGy from
 * --other-dose", "; geometry measured on the patient"; "" when none. */
void est_qualifiers(const sl_assessment *a, char *buf, size_t size);
#define EST_STATUS_LEN 480

/* One line for a treatment beam this tool does not estimate. */
void est_other_beam_text(const sl_other_beam *b, char *buf, size_t size);

/* The result line, shared by every format: allocated (it names every organ
 * that needs attention, however many), NULL when out of memory. */
char *est_result_text(const sl_estimate_report *r);

/* What a format prints when est_result_text() could not be had. */
#define EST_RESULT_FALLBACK "see the organ statuses"

/* With the planning system's dose (--tps-dose): where an organ's dose came
 * from ("model", "planning system", "planning system and model"); the
 * sentence that states the planning system's dose uncertainty and that it
 * is from memory (every format that shows a planning-system dose carries
 * it); a comparison row's name ("every beam", "beam 2"). */
const char *est_tps_source(const sl_organ_dose *d);
void est_tps_u_text(char *buf, size_t size);
void est_tps_row_name(const sl_tps_ratio *t, char *buf, size_t size);
/* A comparison row's cells as the HTML and PDF tables show them: its name,
 * the distance bin (cm), the samples, and the mean, smallest and largest
 * ratio model / planning system. */
void est_tps_ratio_cells(const sl_tps_ratio *t, char cells[6][32]);

/* An organ row's dose cells in the unit of its table (scale s: 1 for cGy,
 * 10 for mGy), as the text and PDF tables show them: the maximum a fraction
 * (by fraction group when there are several: "group 1: x (y); group 2:
 * ...") and the course maximum, each "estimate (upper bound)", the course mean,
 * and the governing level ("bands" for risk bands, "-" without one). */
typedef struct est_dose_cells {
    char fx[240], course[48], mean[24], level[24];
} est_dose_cells;
void est_organ_dose_cells(const sl_estimate *e, const sl_organ_dose *d, const sl_assessment *a,
                          double s, est_dose_cells *c);

/* The level source shown for an organ not judged whose value reaches a
 * level (sl_assessment.unjudged_level_gy). */
extern const char est_unjudged_level_text[];

/* The kind's name or "-". */
const char *est_kind(const sl_assessment *a);

/* The beam's SSD line, "SSD 105.0 cm (inverse square 0.912)" or "SSD
 * unknown (no inverse-square correction)", and its surface obliquity,
 * "12.0 deg" or "unknown". */
void est_ssd_text(const sl_beam_dose *bd, char *buf, size_t size);
void est_obliquity_text(const sl_beam_dose *bd, char *buf, size_t size);

/* The model's limits for a beam: "model limits: 0.0 to 40.0 cm from the
 * field edge, depths 0, 0.5, 1, 1.54 cm" (truncated with "..." if long). */
void est_limits_text(const sl_beam_dose *bd, char *buf, size_t size);

/* Whether a cardiac device was judged as for a pacing-dependent patient
 * because nobody said whether the patient is. */
bool est_pacing_assumed(const sl_estimate_report *r);
/* "; moved up 1 band for pacing dependence" when the device bands were
 * shifted, else "". */
void est_pacing_text(const sl_estimate_report *r, const sl_assessment *a, char *buf, size_t size);

/* Refuse a non-finite number that a writer is about to print: every
 * writer calls it first. */
sl_status est_check_finite(const sl_estimate_report *r, sl_error *err);

/* ---------------------------------------------------------- verdict -- */

/* Units: one a table. Organs are shown in cGy; a fetus in mGy, the unit of
 * its guidance documents. Levels are shown in the unit of the doses beside
 * them. Numbers a person reads have fixed decimals and no exponent. */
bool est_is_fetus(const sl_assessment *a);
/* cGy -> the display unit of this organ (1 or 10), and its name. */
double est_unit_scale(const sl_assessment *a);
const char *est_unit(const sl_assessment *a);
/* A dose already in its display unit: "%.1f", "<0.1" for a positive value
 * that rounds to zero, "-" when not finite. */
void est_num(double v, char *buf, size_t size);
/* As est_num, with more decimals where v is below level yet would print as
 * it (level NAN: none), so that a number never contradicts its status. */
void est_num_below(double v, double level, char *buf, size_t size);

typedef enum est_vkind {
    EST_V_ATTENTION,  /* exceeds, may exceed, a device band, incomplete */
    EST_V_MEASURE,    /* below its level, but a measurement is advised */
    EST_V_NOT_JUDGED, /* has action levels, not judged (in field, near edge, beyond range) */
    EST_V_NOT_FOUND   /* asked for (fetus, device) and not found */
} est_vkind;

/* One line of the verdict box. */
typedef struct est_ventry {
    est_vkind kind;
    const sl_assessment *a;   /* NULL for EST_V_NOT_FOUND */
    const char *cue;          /* a text cue that does not rely on colour: "!!", "!", "M", "?" */
    char organ[160];          /* escaped ROI name, or what was not found */
    char status[160];
    char dose[160];           /* "course 94.3 cGy (upper bound 172.0 cGy)" or "" */
    char level[64];           /* "50.0 cGy" or "" */
    char advice[400];         /* one line */
    const sl_whatif *whatif;  /* a what-if that touches this organ, or NULL */
} est_ventry;

/* The verdict box's lines, attention first (caller frees *out). */
size_t est_verdict(const sl_estimate_report *r, est_ventry **out);
const char *est_vkind_text(est_vkind k);
/* The shape cue of a verdict line (HTML and PDF): a triangle for exceeds, a
 * diamond for may exceed or attention, a disc for measure, "?" otherwise. */
const char *est_vshape(const est_ventry *v);

/* Cautions that belong to this case (a stand-in cutout, extrapolated or
 * out-of-range organs, a poor fit): shown beside the result, before the
 * generic ones. Caller frees the notes. */
void est_case_cautions(const sl_estimate_report *r, sl_notes *out);

/* The what-if mark for an organ, "" or " [what-if]". */
const char *est_whatif_mark(const sl_estimate_report *r, const char *roi);

#endif
