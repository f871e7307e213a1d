/*
 * strayline: the screening log, one SQLite database that `scan` and `listen`
 * write and `history` reads.
 *
 * A department needs a record of what was screened, with which model and
 * action levels, and what was flagged; a re-commissioned model must find the
 * plans screened with the old one. The database runs in WAL mode with a busy
 * timeout, so several writers (listen's workers) and a reader (history) can
 * use it at once; every screening is written in one transaction. The schema
 * (documented in README.md) carries its version in PRAGMA user_version.
 * Version 2 added the in-vivo readings (strayline/invivo.h): a version 1 log
 * is upgraded when opened (the new table added, nothing else touched); a
 * database of any other version is refused, never silently altered.
 */
#ifndef STRAYLINE_SCREENLOG_H
#define STRAYLINE_SCREENLOG_H

#include <stdbool.h>
#include <stddef.h>

#include <stdio.h>

#include "strayline/error.h"
#include "strayline/report.h"

#ifdef __cplusplus
extern "C" {
#endif

#define SL_SCREENLOG_SCHEMA_VERSION 3

typedef struct sl_screenlog sl_screenlog;

/* Open (create with create true) a log. A file that is not a strayline log
 * of this schema version is an input error. The handle may be used from
 * several threads (calls are serialised inside). */
sl_status sl_screenlog_open(const char *path, bool create, sl_screenlog **out, sl_error *err);
void sl_screenlog_close(sl_screenlog *log);

/* A flagged organ of one screening. */
typedef struct sl_log_organ {
    const char *roi;
    const char *kind;         /* organ kind ("lens"), may be NULL */
    const char *status;       /* status text */
    double course_cgy;        /* course dose estimate (cGy), NAN when none */
    double upper_cgy;         /* upper bound k = 2 (cGy), NAN when none */
    const char *level;        /* governing level or band name, may be NULL */
    double level_gy;          /* that level (Gy), NAN for a band */
} sl_log_organ;

/* One screening. Strings may be NULL (stored as NULL) except command,
 * plan_uid and outcome. */
typedef struct sl_log_entry {
    const char *command;      /* "scan" or "listen" */
    const char *plan_uid, *structure_set_uid, *patient_id, *plan_label;
    const char *tool_version;
    const char *model_file, *model_machine, *model_version, *model_sha256;
    const char *levels_file, *levels_sha256;
    const char *options;      /* the per-patient facts and options used, as text */
    const char *outcome;      /* "screened" or "error" */
    const char *worst_status; /* worst organ status, or NULL */
    bool flagged;
    const char *message;      /* why not screened / what to supply; may be NULL */
    const char *report_json, *report_html, *report_pdf;
    const char *organs_not_judged; /* organs with levels not judged ("ROI, ROI"), or NULL */
    size_t norgans;
    const sl_log_organ *organs;
} sl_log_entry;

/* Add a screening (now, UTC) in one transaction; *id receives its row id
 * (may be NULL). Waits for other writers up to the busy timeout. */
sl_status sl_screenlog_add(sl_screenlog *log, const sl_log_entry *e, long long *id,
                           sl_error *err);

/* What history asks for. */
typedef struct sl_history_query {
    bool flagged_only;
    bool attention_only;      /* flagged, or with an organ not judged */
    const char *patient_id;   /* NULL: all */
    const char *since;        /* "YYYY-MM-DD" or a full "YYYY-MM-DDTHH:MM:SSZ"; NULL: all */
    /* stale: the latest screening of each plan whose model is for this
     * machine but whose SHA-256 differs from this one */
    const char *stale_machine;
    const char *stale_sha256;
} sl_history_query;

typedef struct sl_history_organ {
    char *roi, *kind, *status, *level;
    double course_cgy, upper_cgy, level_gy; /* NAN when not recorded */
} sl_history_organ;

typedef struct sl_history_row {
    long long id;
    char *screened_at, *command, *plan_uid, *structure_set_uid, *patient_id, *plan_label;
    char *tool_version, *model_file, *model_machine, *model_version, *model_sha256;
    char *levels_file, *levels_sha256, *options, *outcome, *worst_status, *message;
    char *report_json, *report_html, *report_pdf;
    char *organs_not_judged;  /* "ROI, ROI", or NULL */
    bool flagged;
    size_t norgans;
    sl_history_organ *organs;
} sl_history_row;

typedef struct sl_history {
    size_t n;
    sl_history_row *rows; /* oldest first */
} sl_history;

sl_status sl_screenlog_query(sl_screenlog *log, const sl_history_query *q, sl_history **out,
                             sl_error *err);
void sl_history_free(sl_history *h);

/* `strayline history`: text, JSON or CSV (src/report/history.c). */
sl_status sl_report_history(FILE *fp, sl_format fmt, const sl_history *h, sl_error *err);

#ifdef __cplusplus
}
#endif

#endif
