/*
 * The in-vivo readings in the screening log: one row a reading, with the
 * estimate it was compared with, both uncertainties, the log ratio and the
 * model (file, version, SHA-256) that made the estimate, so that a report
 * or a proposal later knows which model each ratio speaks about. A reading
 * is recorded once: the same reading id of the same patient and plan again
 * is refused, so running `invivo add` twice on a file cannot double the
 * evidence.
 */
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "screenlog_private.h"
#include "strayline/invivo.h"

const char sl_invivo_schema_sql[] =
    "CREATE TABLE invivo_reading ("
    " id INTEGER PRIMARY KEY,"
    " added_at TEXT NOT NULL,"           /* UTC, YYYY-MM-DDTHH:MM:SSZ */
    " reading_id TEXT NOT NULL,"         /* the user's label */
    " readings_file TEXT,"
    " measured_on TEXT NOT NULL,"        /* YYYY-MM-DD */
    " patient_id TEXT NOT NULL,"
    " plan_uid TEXT NOT NULL,"
    " structure_set_uid TEXT, plan_label TEXT,"
    " screening_id INTEGER REFERENCES screening(id),"
    " position TEXT NOT NULL, detector TEXT NOT NULL,"
    " machine TEXT NOT NULL, energy TEXT NOT NULL, energy_mev REAL, applicator TEXT NOT NULL,"
    " distance_cm REAL NOT NULL, depth_cm REAL,"
    " fractions INTEGER NOT NULL, planned_fractions INTEGER,"
    " reading_cgy REAL NOT NULL, energy_correction REAL,"
    " measured_cgy REAL NOT NULL, u_measured_cgy REAL NOT NULL,"
    " estimate_cgy REAL NOT NULL, u_estimate_cgy REAL NOT NULL, u_transfer_cgy REAL NOT NULL,"
    " u_fit_cgy REAL, u_measurement_cgy REAL, u_interpolation_cgy REAL,"
    " u_extrapolation_cgy REAL, u_standin_cgy REAL, u_setup_cgy REAL, u_tilt_ssd_cgy REAL,"
    " log_ratio REAL NOT NULL, u_log_ratio REAL NOT NULL,"
    " flagged INTEGER NOT NULL, model_flags INTEGER NOT NULL, checks TEXT,"
    " model_file TEXT, model_version TEXT, model_sha256 TEXT);"
    "CREATE INDEX invivo_reading_plan ON invivo_reading(plan_uid);"
    "CREATE INDEX invivo_reading_machine ON invivo_reading(machine);";

_Static_assert(sizeof sl_invivo_schema_sql < SL_INVIVO_SCHEMA_MAX, "schema text too long");

sl_status sl_screenlog_plan_screening(sl_screenlog *log, const char *plan_uid, long long *id,
                                      char **when, sl_error *err)
{
    *id = 0;
    *when = NULL;
    sqlite3_stmt *s = NULL;
    sl_status st = SL_OK;
    pthread_mutex_lock(&log->lock);
    if (sqlite3_prepare_v2(log->db,
                           "SELECT id, screened_at FROM screening WHERE plan_uid = ? AND outcome"
                           " = 'screened' ORDER BY id DESC LIMIT 1",
                           -1, &s, NULL) != SQLITE_OK) {
        st = sl_screenlog_db_fail(log, err, "cannot query");
    } else {
        sl_screenlog_bind_text(s, 1, plan_uid);
        int rc = sqlite3_step(s);
        bool ok = true;
        if (rc == SQLITE_ROW) {
            *id = sqlite3_column_int64(s, 0);
            *when = sl_screenlog_col_text(s, 1, &ok);
            if (!ok)
                st = sl_error_set(err, SL_ENOMEM, "out of memory");
        } else if (rc != SQLITE_DONE) {
            st = sl_screenlog_db_fail(log, err, "cannot read the screenings");
        }
    }
    sqlite3_finalize(s);
    pthread_mutex_unlock(&log->lock);
    return st;
}

sl_status sl_screenlog_reading_exists(sl_screenlog *log, const char *patient_id,
                                      const char *plan_uid, const char *reading_id,
                                      char **added_at, sl_error *err)
{
    *added_at = NULL;
    sqlite3_stmt *s = NULL;
    sl_status st = SL_OK;
    pthread_mutex_lock(&log->lock);
    if (sqlite3_prepare_v2(log->db,
                           "SELECT added_at FROM invivo_reading WHERE patient_id = ? AND plan_uid"
                           " = ? AND reading_id = ? LIMIT 1",
                           -1, &s, NULL) != SQLITE_OK) {
        st = sl_screenlog_db_fail(log, err, "cannot query");
    } else {
        sl_screenlog_bind_text(s, 1, patient_id);
        sl_screenlog_bind_text(s, 2, plan_uid);
        sl_screenlog_bind_text(s, 3, reading_id);
        int rc = sqlite3_step(s);
        bool ok = true;
        if (rc == SQLITE_ROW) {
            *added_at = sl_screenlog_col_text(s, 0, &ok);
            if (!ok || !*added_at)
                st = sl_error_set(err, SL_ENOMEM, "out of memory");
        } else if (rc != SQLITE_DONE) {
            st = sl_screenlog_db_fail(log, err, "cannot read the readings");
        }
    }
    sqlite3_finalize(s);
    pthread_mutex_unlock(&log->lock);
    return st;
}

static void position_text(const sl_reading *rd, char *buf, size_t n)
{
    switch (rd->pos) {
    case SL_POS_ROI: snprintf(buf, n, "roi %s (point nearest the field edge)", rd->roi); break;
    case SL_POS_POINT:
        snprintf(buf, n, "point %s (%s) at %.1f, %.1f, %.1f mm", rd->roi, rd->kind,
                 rd->point_mm[0], rd->point_mm[1], rd->point_mm[2]);
        break;
    case SL_POS_LANDMARK:
        snprintf(buf, n, "landmark %s (%s) %.1f cm from the field edge, %.1f cm deep", rd->roi,
                 rd->kind, rd->distance_cm, rd->depth_cm);
        break;
    }
}

sl_status sl_screenlog_add_reading(sl_screenlog *log, const sl_invivo_result *r,
                                   const char *readings_file, const sl_model *model,
                                   long long screening_id, long long *id, sl_error *err)
{
    const sl_reading *rd = r->reading;
    static const char ins[] =
        "INSERT INTO invivo_reading (added_at, reading_id, readings_file, measured_on,"
        " patient_id, plan_uid, structure_set_uid, plan_label, screening_id, position,"
        " detector, machine, energy, energy_mev, applicator, distance_cm, depth_cm, fractions,"
        " planned_fractions, reading_cgy, energy_correction, measured_cgy, u_measured_cgy,"
        " estimate_cgy, u_estimate_cgy, u_transfer_cgy, log_ratio, u_log_ratio, flagged,"
        " model_flags, checks, model_file, model_version, model_sha256, u_fit_cgy,"
        " u_measurement_cgy, u_interpolation_cgy, u_extrapolation_cgy, u_standin_cgy,"
        " u_setup_cgy, u_tilt_ssd_cgy) VALUES (strftime('%Y-%m-%dT%H:%M:%SZ','now'),"
        " ?,?,?,?,?,?,?,?,?,?,?,?,?,?,?,?,?,?,?,?,?,?,?,?,?,?,?,?,?,?,?,?,?,?,?,?,?,?,?,?)";
    char pos[512];
    position_text(rd, pos, sizeof pos);
    sqlite3_stmt *s = NULL;
    sl_status st = SL_OK;
    pthread_mutex_lock(&log->lock);
    if (sqlite3_prepare_v2(log->db, ins, -1, &s, NULL) != SQLITE_OK) {
        st = sl_screenlog_db_fail(log, err, "cannot prepare a statement");
        goto done;
    }
    int k = 1;
    sl_screenlog_bind_text(s, k++, rd->id);
    sl_screenlog_bind_text(s, k++, readings_file);
    sl_screenlog_bind_text(s, k++, rd->date);
    sl_screenlog_bind_text(s, k++, r->patient_id);
    sl_screenlog_bind_text(s, k++, r->plan_uid);
    sl_screenlog_bind_text(s, k++, r->structure_set_uid);
    sl_screenlog_bind_text(s, k++, r->plan_label);
    if (screening_id > 0)
        sqlite3_bind_int64(s, k++, screening_id);
    else
        sqlite3_bind_null(s, k++);
    sl_screenlog_bind_text(s, k++, pos);
    sl_screenlog_bind_text(s, k++, rd->detector);
    sl_screenlog_bind_text(s, k++, r->machine);
    sl_screenlog_bind_text(s, k++, r->energy);
    sl_screenlog_bind_real(s, k++, r->energy_mev);
    sl_screenlog_bind_text(s, k++, r->applicator);
    sl_screenlog_bind_real(s, k++, r->distance_cm);
    sl_screenlog_bind_real(s, k++, r->depth_cm);
    sqlite3_bind_int(s, k++, rd->fractions);
    if (r->planned_fractions > 0)
        sqlite3_bind_int(s, k++, r->planned_fractions);
    else
        sqlite3_bind_null(s, k++);
    const double v[] = {rd->reading_cgy,   rd->energy_correction, r->measured_cgy,
                        r->u_measured_cgy, r->estimate_cgy,       r->u_estimate_cgy,
                        r->u_transfer_cgy, r->log_ratio,          r->u_log_ratio};
    for (size_t i = 0; i < sizeof v / sizeof *v; i++)
        sl_screenlog_bind_real(s, k++, v[i]);
    sqlite3_bind_int(s, k++, r->flagged ? 1 : 0);
    sqlite3_bind_int(s, k++, (int)r->model_flags);
    sl_screenlog_bind_text(s, k++, r->check[0] ? r->check : NULL);
    sl_screenlog_bind_text(s, k++, model->source);
    sl_screenlog_bind_text(s, k++, model->model_version);
    sl_screenlog_bind_text(s, k++, model->sha256);
    const double b[] = {r->budget.fit_cgy,           r->budget.measurement_cgy,
                        r->budget.interpolation_cgy, r->budget.extrapolation_cgy,
                        r->budget.standin_cgy,       r->budget.setup_cgy,
                        r->budget.uncommissioned_cgy};
    for (size_t i = 0; i < sizeof b / sizeof *b; i++)
        sl_screenlog_bind_real(s, k++, b[i]);
    if (sqlite3_step(s) != SQLITE_DONE) {
        st = sl_screenlog_db_fail(log, err, "cannot record the reading");
        goto done;
    }
    if (id)
        *id = sqlite3_last_insert_rowid(log->db);
done:
    sqlite3_finalize(s);
    pthread_mutex_unlock(&log->lock);
    return st;
}

static void reading_clear(sl_log_reading *r)
{
    char **f[] = {&r->added_at,   &r->reading_id, &r->readings_file, &r->date,
                  &r->patient_id, &r->plan_uid,   &r->structure_set_uid, &r->plan_label,
                  &r->position,   &r->detector,   &r->machine,       &r->energy,
                  &r->applicator, &r->check,      &r->model_file,    &r->model_version,
                  &r->model_sha256};
    for (size_t j = 0; j < sizeof f / sizeof *f; j++)
        free(*f[j]);
}

static bool keep_model(const sl_log_reading *r, const char *sha256)
{
    return r->model_sha256 && strcmp(r->model_sha256, sha256) == 0;
}

static const char *version_of(const sl_log_reading *r)
{
    return r->model_version ? r->model_version : "(no version)";
}

size_t sl_log_readings_keep_model(sl_log_readings *rs, const char *sha256, char **versions)
{
    if (versions)
        *versions = NULL;
    sl_buf v = {0};
    size_t kept = 0, dropped = 0;
    /* each version left out named once, in the order first met: the list
     * is made before any reading moves */
    for (size_t i = 0; i < rs->n; i++) {
        if (keep_model(&rs->r[i], sha256))
            continue;
        bool seen = false;
        for (size_t j = 0; j < i && !seen; j++)
            seen = !keep_model(&rs->r[j], sha256) &&
                   strcmp(version_of(&rs->r[j]), version_of(&rs->r[i])) == 0;
        if (!seen)
            sl_buf_printf(&v, "%s%s", v.len ? ", " : "", version_of(&rs->r[i]));
    }
    for (size_t i = 0; i < rs->n; i++) {
        sl_log_reading *r = &rs->r[i];
        if (keep_model(r, sha256)) {
            rs->r[kept++] = *r;
            continue;
        }
        dropped++;
        reading_clear(r);
    }
    rs->n = kept;
    if (versions && dropped && v.data && !v.failed)
        *versions = v.data;
    else
        sl_buf_free(&v);
    return dropped;
}

void sl_log_readings_free(sl_log_readings *rs)
{
    if (!rs)
        return;
    for (size_t i = 0; i < rs->n; i++)
        reading_clear(&rs->r[i]);
    free(rs->r);
    free(rs);
}

sl_status sl_screenlog_readings(sl_screenlog *log, const char *machine, sl_log_readings **out,
                                sl_error *err)
{
    *out = NULL;
    sl_log_readings *rs = calloc(1, sizeof *rs);
    if (!rs)
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    char sql[2048];
    snprintf(sql, sizeof sql,
             "SELECT id, added_at, reading_id, readings_file, measured_on, patient_id, plan_uid,"
             " structure_set_uid, plan_label, screening_id, position, detector, machine, energy,"
             " energy_mev, applicator, distance_cm, depth_cm, fractions, planned_fractions,"
             " reading_cgy, energy_correction, measured_cgy, u_measured_cgy, estimate_cgy,"
             " u_estimate_cgy, u_transfer_cgy, log_ratio, u_log_ratio, flagged, model_flags,"
             " checks, model_file, model_version, model_sha256, u_fit_cgy, u_measurement_cgy,"
             " u_interpolation_cgy, u_extrapolation_cgy, u_standin_cgy, u_setup_cgy,"
             " u_tilt_ssd_cgy"
             " FROM invivo_reading%s ORDER BY id",
             machine ? " WHERE machine = ?" : "");
    sqlite3_stmt *s = NULL;
    sl_status st = SL_OK;
    size_t cap = 0;
    pthread_mutex_lock(&log->lock);
    if (sqlite3_prepare_v2(log->db, sql, -1, &s, NULL) != SQLITE_OK) {
        st = sl_screenlog_db_fail(log, err, "cannot query");
        goto done;
    }
    if (machine)
        sl_screenlog_bind_text(s, 1, machine);
    int rc;
    while ((rc = sqlite3_step(s)) == SQLITE_ROW) {
        if (rs->n == cap) {
            cap = cap ? 2 * cap : 32;
            sl_log_reading *g = realloc(rs->r, cap * sizeof *g);
            if (!g) {
                st = sl_error_set(err, SL_ENOMEM, "out of memory");
                goto done;
            }
            rs->r = g;
        }
        sl_log_reading *r = &rs->r[rs->n++];
        memset(r, 0, sizeof *r);
        bool ok = true;
        int c = 0;
        r->id = sqlite3_column_int64(s, c++);
        r->added_at = sl_screenlog_col_text(s, c++, &ok);
        r->reading_id = sl_screenlog_col_text(s, c++, &ok);
        r->readings_file = sl_screenlog_col_text(s, c++, &ok);
        r->date = sl_screenlog_col_text(s, c++, &ok);
        r->patient_id = sl_screenlog_col_text(s, c++, &ok);
        r->plan_uid = sl_screenlog_col_text(s, c++, &ok);
        r->structure_set_uid = sl_screenlog_col_text(s, c++, &ok);
        r->plan_label = sl_screenlog_col_text(s, c++, &ok);
        r->screening_id = sqlite3_column_int64(s, c++);
        r->position = sl_screenlog_col_text(s, c++, &ok);
        r->detector = sl_screenlog_col_text(s, c++, &ok);
        r->machine = sl_screenlog_col_text(s, c++, &ok);
        r->energy = sl_screenlog_col_text(s, c++, &ok);
        r->energy_mev = sl_screenlog_col_real(s, c++);
        r->applicator = sl_screenlog_col_text(s, c++, &ok);
        r->distance_cm = sl_screenlog_col_real(s, c++);
        r->depth_cm = sl_screenlog_col_real(s, c++);
        r->fractions = sqlite3_column_int(s, c++);
        r->planned_fractions = sqlite3_column_int(s, c++);
        double *d[] = {&r->reading_cgy,   &r->energy_correction, &r->measured_cgy,
                       &r->u_measured_cgy, &r->estimate_cgy,     &r->u_estimate_cgy,
                       &r->u_transfer_cgy, &r->log_ratio,        &r->u_log_ratio};
        for (size_t i = 0; i < sizeof d / sizeof *d; i++)
            *d[i] = sl_screenlog_col_real(s, c++);
        r->flagged = sqlite3_column_int(s, c++) != 0;
        r->model_flags = (unsigned)sqlite3_column_int(s, c++);
        r->check = sl_screenlog_col_text(s, c++, &ok);
        r->model_file = sl_screenlog_col_text(s, c++, &ok);
        r->model_version = sl_screenlog_col_text(s, c++, &ok);
        r->model_sha256 = sl_screenlog_col_text(s, c++, &ok);
        double *bd[] = {&r->budget.fit_cgy,           &r->budget.measurement_cgy,
                        &r->budget.interpolation_cgy, &r->budget.extrapolation_cgy,
                        &r->budget.standin_cgy,       &r->budget.setup_cgy,
                        &r->budget.uncommissioned_cgy};
        for (size_t i = 0; i < sizeof bd / sizeof *bd; i++)
            *bd[i] = sl_screenlog_col_real(s, c++);
        r->budget.transfer_cgy = r->u_transfer_cgy;
        r->budget.combined_cgy = r->u_estimate_cgy;
        if (!ok) {
            st = sl_error_set(err, SL_ENOMEM, "out of memory");
            goto done;
        }
        /* the statistics need these; a row written by hand without them is refused */
        if (!r->machine || !r->energy || !r->applicator || !r->date ||
            !isfinite(r->log_ratio) || !(r->u_log_ratio > 0) || !isfinite(r->distance_cm) ||
            !(r->estimate_cgy > 0) || !isfinite(r->u_estimate_cgy) ||
            !isfinite(r->u_transfer_cgy)) {
            st = sl_error_set(err, SL_EINPUT,
                              "%s: invivo_reading row %lld: a required value is missing or not "
                              "finite",
                              log->path, r->id);
            goto done;
        }
    }
    if (rc != SQLITE_DONE)
        st = sl_screenlog_db_fail(log, err, "cannot read the readings");
done:
    sqlite3_finalize(s);
    pthread_mutex_unlock(&log->lock);
    if (st != SL_OK) {
        sl_log_readings_free(rs);
        return st;
    }
    *out = rs;
    return SL_OK;
}
