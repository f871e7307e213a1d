/*
 * Private to src/log/: the screening log's handle and the small SQLite
 * helpers that screenlog.c (screenings) and invivolog.c (in-vivo readings)
 * share, so that both bind and read values the same way (NULL for an
 * absent or non-finite value, never a made-up number).
 */
#ifndef STRAYLINE_LOG_PRIVATE_H
#define STRAYLINE_LOG_PRIVATE_H

#include <pthread.h>
#include <stdbool.h>

#include <sqlite3.h>

#include "strayline/screenlog.h"

struct sl_screenlog {
    sqlite3 *db;
    char *path;
    pthread_mutex_t lock;
};

/* The in-vivo table (schema version 2), created with a new log and added to
 * a version 1 log when it is opened. */
extern const char sl_invivo_schema_sql[];
#define SL_INVIVO_SCHEMA_MAX 4096 /* bytes; invivolog.c checks its text fits */

sl_status sl_screenlog_db_fail(sl_screenlog *log, sl_error *err, const char *what);
void sl_screenlog_bind_text(sqlite3_stmt *s, int i, const char *v);
void sl_screenlog_bind_real(sqlite3_stmt *s, int i, double v);
char *sl_screenlog_col_text(sqlite3_stmt *s, int i, bool *ok);
double sl_screenlog_col_real(sqlite3_stmt *s, int i);

#endif
