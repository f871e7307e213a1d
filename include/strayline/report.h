/*
 * strayline: the report stage, the last in the flow. Writers turn the data of
 * earlier stages into text, JSON, CSV or HTML; they compute nothing new.
 *
 * Every number is written with its unit in the column heading or key name
 * (cm, MeV, cGy, Gy, deg). A non-finite number reaching a writer is refused
 * with SL_EINTERNAL naming the field: a report never shows NaN.
 */
#ifndef STRAYLINE_REPORT_H
#define STRAYLINE_REPORT_H

#include <stdio.h>

#include "strayline/dicom.h"
#include "strayline/error.h"
#include "strayline/dose.h"
#include "strayline/levels.h"
#include "strayline/locate.h"
#include "strayline/measure.h"
#include "strayline/model.h"
#include "strayline/screen.h"

#ifdef __cplusplus
extern "C" {
#endif

typedef enum sl_format { SL_FORMAT_TEXT, SL_FORMAT_JSON, SL_FORMAT_CSV } sl_format;

/* Parse "text", "json" or "csv". */
bool sl_format_parse(const char *name, sl_format *out);

/* `strayline inspect`: a summary of each object read. */
sl_status sl_report_inspect(FILE *fp, sl_format fmt, const sl_dicom_object *objs, size_t n,
                            sl_error *err);

/* `strayline locate`: per beam, each organ's distances and depths. */
sl_status sl_report_locate(FILE *fp, sl_format fmt, const sl_plan *plan,
                           const sl_structure_set *ss, const sl_location *loc, sl_error *err);

/* `strayline fit --report`: the commissioning report (HTML with SVG). The
 * measurement set (may be NULL) gives each point's uncertainty. */
sl_status sl_report_fit_html(FILE *fp, const sl_measurement_set *ms, const sl_model *m,
                             sl_error *err);

/* The fit report as a PDF (paper "a4" or "letter"): an energy and
 * applicator a page, its profiles as small multiples (caller frees *pdf). */
sl_status sl_report_fit_pdf(const sl_measurement_set *ms, const sl_model *m, const char *paper,
                            unsigned char **pdf, size_t *len, sl_error *err);

/* `strayline model show`: what a model file commissions. */
sl_status sl_report_model(FILE *fp, sl_format fmt, const sl_model *m, sl_error *err);

/* `strayline model eval`: one evaluation. */
sl_status sl_report_model_value(FILE *fp, sl_format fmt, const sl_model *m, double energy_mev,
                                const char *applicator, const char *insert, double depth_cm,
                                double distance_cm, const sl_model_value *v, sl_error *err);

/* Everything an estimate report shows. */
typedef struct sl_estimate_report {
    const sl_plan *plan;
    const sl_structure_set *ss;
    const sl_location *loc;
    const sl_estimate *est;
    const sl_assessments *as;
    const sl_model *model;
    const sl_levels *levels;
    const sl_whatif *whatifs;  /* what the user changed away from the plan as delivered */
    size_t nwhatifs;
} sl_estimate_report;

/* `strayline estimate`: text table, JSON (schema in
 * models/estimate-report.schema.json) or CSV, and the HTML report. */
sl_status sl_report_estimate(FILE *fp, sl_format fmt, const sl_estimate_report *r, sl_error *err);
sl_status sl_report_estimate_html(FILE *fp, const sl_estimate_report *r, sl_error *err);
/* The printable report (cairo + Pango), paper "a4" or "letter": the PDF
 * bytes in *pdf (caller frees), the same for --pdf and --pdf-dicom. */
sl_status sl_report_estimate_pdf(const sl_estimate_report *r, const char *paper,
                                 unsigned char **pdf, size_t *len, sl_error *err);

/* Release the process-wide caches of the figure libraries (Pango's font
 * map, fontconfig's configuration, cairo's static data), so that a leak
 * checker sees only what is really lost. Call once, when no report is being
 * written any more and none will be: at the end of the program. */
void sl_report_release_caches(void);

#ifdef __cplusplus
}
#endif

#endif
