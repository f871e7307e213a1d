/*
 * strayline: commissioning, from a measurement set to a model.
 *
 * Every profile of the measurement set is fitted (profile.h); the machine
 * description, the measured points and provenance (the measurement set's
 * SHA-256, each data file's SHA-256, the tool version, the creation time
 * the caller gives) are copied into a model that sl_model_write() can save.
 */
#ifndef STRAYLINE_COMMISSION_H
#define STRAYLINE_COMMISSION_H

#include "strayline/measure.h"
#include "strayline/model.h"

#ifdef __cplusplus
extern "C" {
#endif

/* Called after each profile; `done` of `total`, `what` names the profile. */
typedef void (*sl_progress_fn)(size_t done, size_t total, const char *what, void *ctx);

typedef struct sl_commission_options {
    const char *model_version; /* label written into the model (required) */
    const char *created;       /* creation time text, e.g. ISO 8601 UTC (required) */
    const char *notice;        /* e.g. "INVENTED DEMO DATA - NOT FOR CLINICAL USE", or NULL */
    int threads;               /* 0: every core */
    sl_progress_fn progress;
    void *progress_ctx;
} sl_commission_options;

sl_status sl_commission(const sl_measurement_set *ms, const sl_commission_options *opt,
                        sl_model **out, sl_error *err);

/* A one-line name of a profile for messages and reports:
 * "9 MeV A10 open 1 cm crossplane". */
void sl_profile_label(double energy_mev, const char *applicator, const char *insert,
                      double depth_cm, const char *direction, char *buf, size_t size);
/* Appends " tilt +5 deg" and " SSD 110 cm" to a label where the profile is
 * tilted or at another SSD than the nominal one. */
void sl_profile_label_geometry(double tilt_deg, double ssd_cm, double nominal_ssd_cm, char *buf,
                               size_t size);

#ifdef __cplusplus
}
#endif

#endif
