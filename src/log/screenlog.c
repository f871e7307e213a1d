/*
 * The screening log in SQLite: schema creation and checking, one transaction
 * per screening, and the queries of `history`.
 *
 * One connection serves every thread of a process; a mutex around each
 * transaction keeps two threads' statements from interleaving on it. Other
 * processes (a `history` reading while `listen` writes) meet the database
 * through WAL mode and a busy timeout, which is what SQLite provides for
 * that; nothing here locks files itself.
 */
#include <math.h>
#include <pthread.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include <sqlite3.h>

#include "strayline/invivo.h"
#include "strayline/screenlog.h"

/* How long a writer waits for another (ms): listen's workers write one
 * short transaction each, so seconds are plenty. */
#define BUSY_TIMEOUT_MS 15000

#include "screenlog_private.h"

static const char schema_sql[] =
    "CREATE TABLE screening ("
    " id INTEGER PRIMARY KEY,"
    " screened_at TEXT NOT NULL,"        /* UTC, YYYY-MM-DDTHH:MM:SSZ */
    " command TEXT NOT NULL,"            /* scan | listen */
    " plan_uid TEXT NOT NULL,"
    " structure_set_uid TEXT,"
    " patient_id TEXT,"
    " plan_label TEXT,"
    " tool_version TEXT NOT NULL,"
    " model_file TEXT, model_machine TEXT, model_version TEXT, model_sha256 TEXT,"
    " levels_file TEXT, levels_sha256 TEXT,"
    " options TEXT,"
    " outcome TEXT NOT NULL,"            /* screened | error */
    " worst_status TEXT,"
    " flagged INTEGER NOT NULL,"
    " message TEXT,"
    " report_json TEXT, report_html TEXT, report_pdf TEXT,"
    " organs_not_judged TEXT);"          /* "ROI, ROI": organs with levels not judged */
    "CREATE INDEX screening_plan ON screening(plan_uid);"
    "CREATE INDEX screening_patient ON screening(patient_id);"
    "CREATE TABLE flagged_organ ("
    " screening_id INTEGER NOT NULL REFERENCES screening(id),"
    " roi TEXT NOT NULL, kind TEXT, status TEXT NOT NULL,"
    " course_cgy REAL, upper_cgy REAL,"
    " level TEXT, level_gy REAL);"
    "CREATE INDEX flagged_organ_screening ON flagged_organ(screening_id);";

/* Schema version 2 added the in-vivo readings (src/log/invivolog.c), version
 * 3 the organs not judged of each screening (a plan with one is not clear,
 * and the log is the lasting record of it): an older log is upgraded when
 * it is opened, in one transaction, and keeps every screening it had. */
static sl_status migrate(sl_screenlog *log, int *v, sl_error *err);

sl_status sl_screenlog_db_fail(sl_screenlog *log, sl_error *err, const char *what)
{
    int code = sqlite3_errcode(log->db);
    sl_status st = code == SQLITE_NOTADB || code == SQLITE_CORRUPT ? SL_EINPUT : SL_EIO;
    return sl_error_set(err, st, "%s: screening log: %s: %s", log->path, what,
                        sqlite3_errmsg(log->db));
}

static int user_version(sqlite3 *db, int *v)
{
    sqlite3_stmt *s;
    int rc = sqlite3_prepare_v2(db, "PRAGMA user_version", -1, &s, NULL);
    if (rc != SQLITE_OK)
        return rc;
    rc = sqlite3_step(s);
    if (rc == SQLITE_ROW) {
        *v = sqlite3_column_int(s, 0);
        rc = SQLITE_OK;
    }
    sqlite3_finalize(s);
    return rc;
}

static int count_tables(sqlite3 *db, int *n)
{
    sqlite3_stmt *s;
    int rc = sqlite3_prepare_v2(db, "SELECT count(*) FROM sqlite_schema", -1, &s, NULL);
    if (rc != SQLITE_OK)
        return rc;
    rc = sqlite3_step(s);
    if (rc == SQLITE_ROW) {
        *n = sqlite3_column_int(s, 0);
        rc = SQLITE_OK;
    }
    sqlite3_finalize(s);
    return rc;
}

static bool has_screening_table(sqlite3 *db)
{
    sqlite3_stmt *s;
    if (sqlite3_prepare_v2(db,
                           "SELECT count(*) FROM sqlite_schema WHERE type = 'table' AND name = "
                           "'screening'",
                           -1, &s, NULL) != SQLITE_OK)
        return false;
    bool yes = sqlite3_step(s) == SQLITE_ROW && sqlite3_column_int(s, 0) == 1;
    sqlite3_finalize(s);
    return yes;
}

sl_status sl_screenlog_open(const char *path, bool create, sl_screenlog **out, sl_error *err)
{
    *out = NULL;
    sl_screenlog *log = calloc(1, sizeof *log);
    if (!log || !(log->path = strdup(path))) {
        free(log);
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    }
    pthread_mutex_init(&log->lock, NULL);
    int flags = SQLITE_OPEN_READWRITE | SQLITE_OPEN_FULLMUTEX | (create ? SQLITE_OPEN_CREATE : 0);
    int rc = sqlite3_open_v2(path, &log->db, flags, NULL);
    sl_status st = SL_OK;
    if (rc != SQLITE_OK) {
        st = sl_error_set(err, create ? SL_EIO : SL_EINPUT, "%s: cannot open the screening log: %s",
                          path, log->db ? sqlite3_errmsg(log->db) : sqlite3_errstr(rc));
        goto fail;
    }
    sqlite3_busy_timeout(log->db, BUSY_TIMEOUT_MS);
    int v = 0, ntables = 0;
    /* both read in one transaction: another process creating the schema
     * commits tables and version at once, and a reader between the two
     * reads would see tables without a version */
    sqlite3_exec(log->db, "BEGIN", NULL, NULL, NULL);
    int rv = user_version(log->db, &v), rt = count_tables(log->db, &ntables);
    sqlite3_exec(log->db, "COMMIT", NULL, NULL, NULL);
    if (rv != SQLITE_OK || rt != SQLITE_OK) {
        st = sl_error_set(err, SL_EINPUT, "%s: not a screening log (SQLite: %s)", path,
                          sqlite3_errmsg(log->db));
        goto fail;
    }
    if (v == 0 && ntables == 0) {
        if (!create) {
            st = sl_error_set(err, SL_EINPUT, "%s: an empty database, not a screening log", path);
            goto fail;
        }
        char sql[sizeof schema_sql + SL_INVIVO_SCHEMA_MAX + 128];
        snprintf(sql, sizeof sql, "BEGIN IMMEDIATE;%s%sPRAGMA user_version=%d;COMMIT;", schema_sql,
                 sl_invivo_schema_sql, SL_SCREENLOG_SCHEMA_VERSION);
        /* another process may create it at the same moment: its CREATE wins,
         * this one's fails on the existing table, and the version re-read
         * below is the other's */
        if (sqlite3_exec(log->db, sql, NULL, NULL, NULL) != SQLITE_OK) {
            st = sl_screenlog_db_fail(log, err, "cannot create the schema");
            sqlite3_exec(log->db, "ROLLBACK", NULL, NULL, NULL);
            if (user_version(log->db, &v) != SQLITE_OK || v == 0)
                goto fail;
            if (err)
                memset(err, 0, sizeof *err);
            st = SL_OK;
        } else if (user_version(log->db, &v) != SQLITE_OK) {
            st = sl_screenlog_db_fail(log, err, "cannot read the schema version");
            goto fail;
        }
    }
    if ((v == 1 || v == 2) && !has_screening_table(log->db)) {
        /* another program's database that happens to carry the number */
        st = sl_error_set(err, SL_EINPUT,
                          "%s: PRAGMA user_version %d but no table 'screening': not a strayline "
                          "screening log",
                          path, v);
        goto fail;
    }
    if ((v == 1 || v == 2) && (st = migrate(log, &v, err)) != SL_OK)
        goto fail;
    if (v != SL_SCREENLOG_SCHEMA_VERSION) {
        st = sl_error_set(err, SL_EINPUT,
                          "%s: PRAGMA user_version: %d: not a strayline screening log of schema "
                          "version %d",
                          path, v, SL_SCREENLOG_SCHEMA_VERSION);
        goto fail;
    }
    /* WAL lets listen's writers and a history reader work at once; it is a
     * property of the file, so set it whenever the log is opened to write */
    /* in WAL mode, synchronous=NORMAL keeps the database consistent after a
     * power cut (the last commits may be lost) without a sync per screening */
    if (create && sqlite3_exec(log->db, "PRAGMA journal_mode=WAL; PRAGMA synchronous=NORMAL",
                               NULL, NULL, NULL) != SQLITE_OK) {
        st = sl_screenlog_db_fail(log, err, "cannot switch to WAL mode");
        goto fail;
    }
    *out = log;
    return SL_OK;
fail:
    sl_screenlog_close(log);
    return st;
}

static sl_status migrate(sl_screenlog *log, int *v, sl_error *err)
{
    if (sqlite3_exec(log->db, "BEGIN IMMEDIATE", NULL, NULL, NULL) != SQLITE_OK)
        return sl_screenlog_db_fail(log, err, "cannot begin the schema upgrade");
    /* another process may have upgraded it while this one waited */
    if (user_version(log->db, v) != SQLITE_OK) {
        sqlite3_exec(log->db, "ROLLBACK", NULL, NULL, NULL);
        return sl_screenlog_db_fail(log, err, "cannot read the schema version");
    }
    if (*v != 1 && *v != 2)
        return sqlite3_exec(log->db, "COMMIT", NULL, NULL, NULL) == SQLITE_OK
                   ? SL_OK
                   : sl_screenlog_db_fail(log, err, "cannot end the schema upgrade");
    char sql[SL_INVIVO_SCHEMA_MAX + 160];
    snprintf(sql, sizeof sql,
             "%sALTER TABLE screening ADD COLUMN organs_not_judged TEXT;"
             "PRAGMA user_version=%d;COMMIT;",
             *v == 1 ? sl_invivo_schema_sql : "", SL_SCREENLOG_SCHEMA_VERSION);
    if (sqlite3_exec(log->db, sql, NULL, NULL, NULL) != SQLITE_OK) {
        sl_status st = sl_screenlog_db_fail(log, err, "cannot upgrade the schema");
        sqlite3_exec(log->db, "ROLLBACK", NULL, NULL, NULL);
        return st;
    }
    *v = SL_SCREENLOG_SCHEMA_VERSION;
    return SL_OK;
}

void sl_screenlog_close(sl_screenlog *log)
{
    if (!log)
        return;
    sqlite3_close(log->db);
    pthread_mutex_destroy(&log->lock);
    free(log->path);
    free(log);
}

void sl_screenlog_bind_text(sqlite3_stmt *s, int i, const char *v)
{
    if (v)
        sqlite3_bind_text(s, i, v, -1, SQLITE_TRANSIENT);
    else
        sqlite3_bind_null(s, i);
}

void sl_screenlog_bind_real(sqlite3_stmt *s, int i, double v)
{
    if (isfinite(v))
        sqlite3_bind_double(s, i, v);
    else
        sqlite3_bind_null(s, i);
}

sl_status sl_screenlog_add(sl_screenlog *log, const sl_log_entry *e, long long *id, sl_error *err)
{
    if (!e->command || !e->plan_uid || !e->outcome || !e->tool_version)
        return sl_error_set(err, SL_EINTERNAL, "screening log: an entry without its plan UID");
    static const char ins[] =
        "INSERT INTO screening (screened_at, command, plan_uid, structure_set_uid, patient_id,"
        " plan_label, tool_version, model_file, model_machine, model_version, model_sha256,"
        " levels_file, levels_sha256, options, outcome, worst_status, flagged, message,"
        " report_json, report_html, report_pdf, organs_not_judged)"
        " VALUES (strftime('%Y-%m-%dT%H:%M:%SZ','now'),"
        " ?,?,?,?,?,?,?,?,?,?,?,?,?,?,?,?,?,?,?,?,?)";
    static const char ins_organ[] =
        "INSERT INTO flagged_organ (screening_id, roi, kind, status, course_cgy, upper_cgy,"
        " level, level_gy) VALUES (?,?,?,?,?,?,?,?)";
    sl_status st = SL_OK;
    sqlite3_stmt *s = NULL, *so = NULL;
    pthread_mutex_lock(&log->lock);
    if (sqlite3_exec(log->db, "BEGIN IMMEDIATE", NULL, NULL, NULL) != SQLITE_OK) {
        st = sl_screenlog_db_fail(log, err, "cannot begin a transaction");
        pthread_mutex_unlock(&log->lock);
        return st;
    }
    if (sqlite3_prepare_v2(log->db, ins, -1, &s, NULL) != SQLITE_OK ||
        sqlite3_prepare_v2(log->db, ins_organ, -1, &so, NULL) != SQLITE_OK) {
        st = sl_screenlog_db_fail(log, err, "cannot prepare a statement");
        goto rollback;
    }
    const char *v[] = {e->command,       e->plan_uid,      e->structure_set_uid, e->patient_id,
                       e->plan_label,    e->tool_version,  e->model_file,        e->model_machine,
                       e->model_version, e->model_sha256,  e->levels_file,       e->levels_sha256,
                       e->options,       e->outcome,       e->worst_status};
    int k = 1;
    for (size_t i = 0; i < sizeof v / sizeof *v; i++)
        sl_screenlog_bind_text(s, k++, v[i]);
    sqlite3_bind_int(s, k++, e->flagged ? 1 : 0);
    sl_screenlog_bind_text(s, k++, e->message);
    sl_screenlog_bind_text(s, k++, e->report_json);
    sl_screenlog_bind_text(s, k++, e->report_html);
    sl_screenlog_bind_text(s, k++, e->report_pdf);
    sl_screenlog_bind_text(s, k++, e->organs_not_judged);
    if (sqlite3_step(s) != SQLITE_DONE) {
        st = sl_screenlog_db_fail(log, err, "cannot record the screening");
        goto rollback;
    }
    long long rowid = sqlite3_last_insert_rowid(log->db);
    for (size_t i = 0; i < e->norgans; i++) {
        const sl_log_organ *o = &e->organs[i];
        sqlite3_reset(so);
        sqlite3_bind_int64(so, 1, rowid);
        sl_screenlog_bind_text(so, 2, o->roi ? o->roi : "");
        sl_screenlog_bind_text(so, 3, o->kind);
        sl_screenlog_bind_text(so, 4, o->status ? o->status : "");
        sl_screenlog_bind_real(so, 5, o->course_cgy);
        sl_screenlog_bind_real(so, 6, o->upper_cgy);
        sl_screenlog_bind_text(so, 7, o->level);
        sl_screenlog_bind_real(so, 8, o->level_gy);
        if (sqlite3_step(so) != SQLITE_DONE) {
            st = sl_screenlog_db_fail(log, err, "cannot record a flagged organ");
            goto rollback;
        }
    }
    if (sqlite3_exec(log->db, "COMMIT", NULL, NULL, NULL) != SQLITE_OK) {
        st = sl_screenlog_db_fail(log, err, "cannot commit");
        goto rollback;
    }
    sqlite3_finalize(s);
    sqlite3_finalize(so);
    pthread_mutex_unlock(&log->lock);
    if (id)
        *id = rowid;
    return SL_OK;
rollback:
    sqlite3_finalize(s);
    sqlite3_finalize(so);
    sqlite3_exec(log->db, "ROLLBACK", NULL, NULL, NULL);
    pthread_mutex_unlock(&log->lock);
    return st;
}

char *sl_screenlog_col_text(sqlite3_stmt *s, int i, bool *ok)
{
    const unsigned char *t = sqlite3_column_text(s, i);
    if (!t)
        return NULL;
    char *c = strdup((const char *)t);
    if (!c)
        *ok = false;
    return c;
}

double sl_screenlog_col_real(sqlite3_stmt *s, int i)
{
    return sqlite3_column_type(s, i) == SQLITE_NULL ? NAN : sqlite3_column_double(s, i);
}

static void row_free(sl_history_row *r)
{
    char **f[] = {&r->screened_at,  &r->command,       &r->plan_uid,     &r->structure_set_uid,
                  &r->patient_id,   &r->plan_label,    &r->tool_version, &r->model_file,
                  &r->model_machine, &r->model_version, &r->model_sha256, &r->levels_file,
                  &r->levels_sha256, &r->options,      &r->outcome,      &r->worst_status,
                  &r->message,      &r->report_json,   &r->report_html, &r->report_pdf,
                  &r->organs_not_judged};
    for (size_t i = 0; i < sizeof f / sizeof *f; i++)
        free(*f[i]);
    for (size_t i = 0; i < r->norgans; i++) {
        free(r->organs[i].roi);
        free(r->organs[i].kind);
        free(r->organs[i].status);
        free(r->organs[i].level);
    }
    free(r->organs);
}

void sl_history_free(sl_history *h)
{
    if (!h)
        return;
    for (size_t i = 0; i < h->n; i++)
        row_free(&h->rows[i]);
    free(h->rows);
    free(h);
}

#define COLUMNS                                                                                \
    "s.id, s.screened_at, s.command, s.plan_uid, s.structure_set_uid, s.patient_id,"           \
    " s.plan_label, s.tool_version, s.model_file, s.model_machine, s.model_version,"           \
    " s.model_sha256, s.levels_file, s.levels_sha256, s.options, s.outcome, s.worst_status,"   \
    " s.message, s.report_json, s.report_html, s.report_pdf, s.flagged, s.organs_not_judged"

static sl_status load_organs(sl_screenlog *log, sqlite3_stmt *so, sl_history_row *r, sl_error *err)
{
    sqlite3_reset(so);
    sqlite3_bind_int64(so, 1, r->id);
    bool ok = true;
    int rc;
    while ((rc = sqlite3_step(so)) == SQLITE_ROW) {
        sl_history_organ *g = realloc(r->organs, (r->norgans + 1) * sizeof *g);
        if (!g)
            return sl_error_set(err, SL_ENOMEM, "out of memory");
        r->organs = g;
        g = &r->organs[r->norgans++];
        g->roi = sl_screenlog_col_text(so, 0, &ok);
        g->kind = sl_screenlog_col_text(so, 1, &ok);
        g->status = sl_screenlog_col_text(so, 2, &ok);
        g->course_cgy = sl_screenlog_col_real(so, 3);
        g->upper_cgy = sl_screenlog_col_real(so, 4);
        g->level = sl_screenlog_col_text(so, 5, &ok);
        g->level_gy = sl_screenlog_col_real(so, 6);
    }
    if (rc != SQLITE_DONE)
        return sl_screenlog_db_fail(log, err, "cannot read flagged organs");
    return ok ? SL_OK : sl_error_set(err, SL_ENOMEM, "out of memory");
}

sl_status sl_screenlog_query(sl_screenlog *log, const sl_history_query *q, sl_history **out,
                             sl_error *err)
{
    *out = NULL;
    char sql[2048];
    if (q->stale_machine)
        /* the latest screening of each plan (by row id: screened_at has
         * one-second steps), if its model is another version of this
         * machine's; a screening that ended in an error counts too, since a
         * new model (an energy or applicator added) is what it may need */
        snprintf(sql, sizeof sql,
                 "SELECT " COLUMNS " FROM screening s WHERE s.outcome IN ('screened', 'error')"
                 " AND s.id = (SELECT max(t.id) FROM screening t WHERE t.plan_uid = s.plan_uid"
                 " AND t.outcome IN ('screened', 'error') AND t.model_machine = ?1)"
                 " AND s.model_sha256 IS NOT ?2"
                 "%s%s%s ORDER BY s.id",
                 q->flagged_only     ? " AND s.flagged = 1"
                 : q->attention_only ? " AND (s.flagged = 1 OR s.organs_not_judged IS NOT NULL)"
                                     : "",
                 q->patient_id ? " AND s.patient_id = ?3" : "",
                 q->since ? " AND s.screened_at >= ?4" : "");
    else
        snprintf(sql, sizeof sql, "SELECT " COLUMNS " FROM screening s WHERE 1%s%s%s ORDER BY s.id",
                 q->flagged_only     ? " AND s.flagged = 1"
                 : q->attention_only ? " AND (s.flagged = 1 OR s.organs_not_judged IS NOT NULL)"
                                     : "",
                 q->patient_id ? " AND s.patient_id = ?3" : "",
                 q->since ? " AND s.screened_at >= ?4" : "");
    sqlite3_stmt *s = NULL, *so = NULL;
    sl_history *h = calloc(1, sizeof *h);
    if (!h)
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    sl_status st = SL_OK;
    pthread_mutex_lock(&log->lock);
    if (sqlite3_exec(log->db, "BEGIN", NULL, NULL, NULL) != SQLITE_OK ||
        sqlite3_prepare_v2(log->db, sql, -1, &s, NULL) != SQLITE_OK ||
        sqlite3_prepare_v2(log->db,
                           "SELECT roi, kind, status, course_cgy, upper_cgy, level, level_gy"
                           " FROM flagged_organ WHERE screening_id = ? ORDER BY rowid",
                           -1, &so, NULL) != SQLITE_OK) {
        st = sl_screenlog_db_fail(log, err, "cannot query");
        goto done;
    }
    if (q->stale_machine) {
        sl_screenlog_bind_text(s, 1, q->stale_machine);
        sl_screenlog_bind_text(s, 2, q->stale_sha256);
    }
    if (q->patient_id)
        sl_screenlog_bind_text(s, 3, q->patient_id);
    if (q->since)
        sl_screenlog_bind_text(s, 4, q->since);
    int rc;
    size_t cap = 0;
    while ((rc = sqlite3_step(s)) == SQLITE_ROW) {
        if (h->n == cap) {
            cap = cap ? 2 * cap : 16;
            sl_history_row *g = realloc(h->rows, cap * sizeof *g);
            if (!g) {
                st = sl_error_set(err, SL_ENOMEM, "out of memory");
                goto done;
            }
            h->rows = g;
        }
        sl_history_row *r = &h->rows[h->n++];
        memset(r, 0, sizeof *r);
        bool ok = true;
        r->id = sqlite3_column_int64(s, 0);
        char **f[] = {&r->screened_at,  &r->command,       &r->plan_uid,     &r->structure_set_uid,
                      &r->patient_id,   &r->plan_label,    &r->tool_version, &r->model_file,
                      &r->model_machine, &r->model_version, &r->model_sha256, &r->levels_file,
                      &r->levels_sha256, &r->options,      &r->outcome,      &r->worst_status,
                      &r->message,      &r->report_json,   &r->report_html, &r->report_pdf};
        for (size_t i = 0; i < sizeof f / sizeof *f; i++)
            *f[i] = sl_screenlog_col_text(s, (int)i + 1, &ok);
        r->flagged = sqlite3_column_int(s, 21) != 0;
        r->organs_not_judged = sl_screenlog_col_text(s, 22, &ok);
        if (!ok) {
            st = sl_error_set(err, SL_ENOMEM, "out of memory");
            goto done;
        }
        if ((st = load_organs(log, so, r, err)) != SL_OK)
            goto done;
    }
    if (rc != SQLITE_DONE)
        st = sl_screenlog_db_fail(log, err, "cannot read the screenings");
done:
    sqlite3_finalize(s);
    sqlite3_finalize(so);
    sqlite3_exec(log->db, "COMMIT", NULL, NULL, NULL);
    pthread_mutex_unlock(&log->lock);
    if (st != SL_OK) {
        sl_history_free(h);
        return st;
    }
    *out = h;
    return SL_OK;
}
