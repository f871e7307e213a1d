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
#define EST_NFLAGS 7

/* An organ's marks, " [extrapolated] [depth] ...", short or spelled out. */
void est_marks(const sl_organ_dose *d, bool verbose, char *buf, size_t size);
/* What every short mark means, in one line. */
const char *est_marks_legend(void);

/* The names and values of an uncertainty budget's components, in order. */
#define EST_NBUDGET 8
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

/* The result line, shared by text and HTML. */
void est_result_text(const sl_estimate_report *r, char *buf, size_t size);

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

/* "; moved up 1 band for pacing dependence" when the device bands were
 * shifted, else "". */
void est_pacing_text(const sl_estimate_report *r, const sl_assessment *a, char *buf, size_t size);

/* Refuse a non-finite number that a writer is about to print: every
 * writer calls it first. */
sl_status est_check_finite(const sl_estimate_report *r, sl_error *err);

#endif
