/*
 * Unit tests of the batch modules: the UID grammar (DICOM PS3.5 section 9.1),
 * AE titles (PS3.5 section 6.2, AE value representation), name
 * sanitising, the screening log (SQLite: concurrent writers, stale
 * queries, schema version), the per-patient facts file, and which RT Doses
 * of a folder go with which plan.
 */
#include <math.h>
#include <pthread.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#include "check_main.h"
#include "strayline/dicomhead.h"
#include "strayline/scan.h"
#include "strayline/screenlog.h"
#include "strayline/storescp.h"

START_TEST(uid_grammar_of_ps3_5)
{
    /* PS3.5 9.1: components of digits separated by '.', no leading zero in a
     * component of more than one digit, at most 64 characters */
    ck_assert(sl_dicom_uid_valid("1.2.840.10008.5.1.4.1.1.481.5"));
    ck_assert(sl_dicom_uid_valid("2.25.0"));
    ck_assert(sl_dicom_uid_valid("0.1"));
    const char *bad[] = {"", "1..2", ".1", "1.", "1.02", "1.2a", "1/2", "../1", "1.2 "};
    for (size_t i = 0; i < sizeof bad / sizeof *bad; i++)
        ck_assert_msg(!sl_dicom_uid_valid(bad[i]), "accepted '%s'", bad[i]);
    char longuid[70];
    memset(longuid, '1', 65);
    longuid[65] = '\0';
    ck_assert(!sl_dicom_uid_valid(longuid));
    longuid[64] = '\0';
    ck_assert(sl_dicom_uid_valid(longuid));
}
END_TEST

START_TEST(ae_titles)
{
    /* PS3.5 6.2: AE is at most 16 characters of the default repertoire, no
     * backslash or control characters, not only spaces */
    ck_assert(sl_ae_title_valid("STRAYLINE"));
    ck_assert(sl_ae_title_valid("TPS 1"));
    ck_assert(!sl_ae_title_valid(""));
    ck_assert(!sl_ae_title_valid("    "));
    ck_assert(!sl_ae_title_valid("SEVENTEEN_LETTERS"));
    ck_assert(!sl_ae_title_valid("A\\B"));
    ck_assert(!sl_ae_title_valid("A\nB"));
}
END_TEST

START_TEST(sanitised_names_stay_in_their_folder)
{
    char out[64];
    sl_sanitise_name("../../etc/passwd", out, sizeof out);
    ck_assert_ptr_null(strchr(out, '/'));
    ck_assert(out[0] != '.');
    sl_sanitise_name("Pat\xc3\xa9 01:x", out, sizeof out);
    ck_assert_str_eq(out, "Pat___01_x"); /* two bytes of UTF-8, a space, a colon */
    sl_sanitise_name("abcdefghijklmnopqrstuvwxyz", out, 8);
    ck_assert_str_eq(out, "abcdefg");
}
END_TEST

static char tmpdir[64];

static void make_tmp(void)
{
    snprintf(tmpdir, sizeof tmpdir, "/tmp/strayline-unit-XXXXXX");
    ck_assert_ptr_nonnull(mkdtemp(tmpdir));
}

static void rm_tmp(void)
{
    char cmd[128];
    snprintf(cmd, sizeof cmd, "rm -rf '%s'", tmpdir);
    ck_assert_int_eq(system(cmd), 0);
}

static sl_log_entry entry(const char *plan, const char *sha, bool flagged)
{
    sl_log_entry e = {0};
    e.command = "scan";
    e.plan_uid = plan;
    e.patient_id = "UNIT-01";
    e.tool_version = "test";
    e.model_machine = "DEMO-LINAC";
    e.model_sha256 = sha;
    e.outcome = "screened";
    e.flagged = flagged;
    return e;
}

typedef struct writer_arg {
    sl_screenlog *log;
    int base;
    int failures;
} writer_arg;

static void *writer(void *p)
{
    writer_arg *w = p;
    char uid[32];
    sl_log_organ o = {"Lens_L", "lens", "EXCEEDS level", 60.0, 120.0, "cataract", 0.5};
    for (int i = 0; i < 50; i++) {
        snprintf(uid, sizeof uid, "1.2.%d.%d", w->base, i);
        sl_log_entry e = entry(uid, "aaaa", i % 2);
        e.norgans = 1;
        e.organs = &o;
        sl_error err = {0};
        if (sl_screenlog_add(w->log, &e, NULL, &err) != SL_OK)
            w->failures++;
    }
    return NULL;
}

START_TEST(log_takes_concurrent_writers)
{
    make_tmp();
    char path[128];
    snprintf(path, sizeof path, "%s/log.sqlite", tmpdir);
    sl_error err = {0};
    /* two handles, as two processes would have, and two threads on each */
    sl_screenlog *a = NULL, *b = NULL;
    ck_assert_int_eq(sl_screenlog_open(path, true, &a, &err), SL_OK);
    ck_assert_int_eq(sl_screenlog_open(path, true, &b, &err), SL_OK);
    pthread_t th[4];
    writer_arg args[4] = {{a, 1, 0}, {a, 2, 0}, {b, 3, 0}, {b, 4, 0}};
    for (int i = 0; i < 4; i++)
        ck_assert_int_eq(pthread_create(&th[i], NULL, writer, &args[i]), 0);
    for (int i = 0; i < 4; i++) {
        pthread_join(th[i], NULL);
        ck_assert_int_eq(args[i].failures, 0);
    }
    sl_history_query q = {0};
    sl_history *h = NULL;
    ck_assert_int_eq(sl_screenlog_query(b, &q, &h, &err), SL_OK);
    ck_assert_uint_eq(h->n, 200);
    for (size_t i = 0; i < h->n; i++) {
        ck_assert_uint_eq(h->rows[i].norgans, 1);
        ck_assert_double_eq(h->rows[i].organs[0].course_cgy, 60.0);
    }
    sl_history_free(h);
    q.flagged_only = true;
    ck_assert_int_eq(sl_screenlog_query(a, &q, &h, &err), SL_OK);
    ck_assert_uint_eq(h->n, 100);
    sl_history_free(h);
    sl_screenlog_close(a);
    sl_screenlog_close(b);
    rm_tmp();
}
END_TEST

START_TEST(log_stale_is_the_latest_screening_of_each_plan)
{
    make_tmp();
    char path[128];
    snprintf(path, sizeof path, "%s/log.sqlite", tmpdir);
    sl_error err = {0};
    sl_screenlog *log = NULL;
    ck_assert_int_eq(sl_screenlog_open(path, true, &log, &err), SL_OK);
    sl_log_entry e1 = entry("1.1", "old", false), e2 = entry("1.2", "old", true),
                 e3 = entry("1.1", "new", false), e4 = entry("1.3", "other-machine", false);
    e4.model_machine = "OTHER";
    ck_assert_int_eq(sl_screenlog_add(log, &e1, NULL, &err), SL_OK);
    ck_assert_int_eq(sl_screenlog_add(log, &e2, NULL, &err), SL_OK);
    ck_assert_int_eq(sl_screenlog_add(log, &e3, NULL, &err), SL_OK);
    ck_assert_int_eq(sl_screenlog_add(log, &e4, NULL, &err), SL_OK);
    sl_history_query q = {.stale_machine = "DEMO-LINAC", .stale_sha256 = "new"};
    sl_history *h = NULL;
    ck_assert_int_eq(sl_screenlog_query(log, &q, &h, &err), SL_OK);
    ck_assert_uint_eq(h->n, 1); /* 1.1 was screened again with the new model */
    ck_assert_str_eq(h->rows[0].plan_uid, "1.2");
    sl_history_free(h);
    sl_screenlog_close(log);
    rm_tmp();
}
END_TEST

START_TEST(log_refuses_what_is_not_a_log)
{
    make_tmp();
    char path[128];
    snprintf(path, sizeof path, "%s/text.sqlite", tmpdir);
    FILE *fp = fopen(path, "w");
    ck_assert_ptr_nonnull(fp);
    fputs("not a database, just some text that is long enough to be looked at\n", fp);
    fclose(fp);
    sl_error err = {0};
    sl_screenlog *log = NULL;
    ck_assert_int_eq(sl_screenlog_open(path, false, &log, &err), SL_EINPUT);
    ck_assert_ptr_nonnull(strstr(err.msg, path));
    /* another schema version */
    snprintf(path, sizeof path, "%s/other.sqlite", tmpdir);
    ck_assert_int_eq(sl_screenlog_open(path, true, &log, &err), SL_OK);
    sl_screenlog_close(log);
    char cmd[256];
    snprintf(cmd, sizeof cmd, "/usr/bin/python3 -c \"import sqlite3; c = sqlite3.connect('%s'); "
                              "c.execute('PRAGMA user_version=7'); c.commit()\"",
             path);
    ck_assert_int_eq(system(cmd), 0);
    log = NULL;
    ck_assert_int_eq(sl_screenlog_open(path, false, &log, &err), SL_EINPUT);
    ck_assert_ptr_nonnull(strstr(err.msg, "schema version"));
    rm_tmp();
}
END_TEST

START_TEST(facts_file)
{
    make_tmp();
    char path[128];
    snprintf(path, sizeof path, "%s/facts.yaml", tmpdir);
    FILE *fp = fopen(path, "w");
    ck_assert_ptr_nonnull(fp);
    fputs("format: strayline-patient-facts\n"
          "patients:\n"
          "  - key: P1\n"
          "    gestational_age_weeks: 12\n"
          "    organs: [{roi: Baby, kind: fetus}]\n"
          "  - key: 1.2.3\n"
          "    pacing_dependent: true\n"
          "    other_dose: [{roi: Heart, cgy: 5}]\n",
          fp);
    fclose(fp);
    sl_facts *f = NULL;
    sl_error err = {0};
    ck_assert_int_eq(sl_facts_load(path, &f, &err), SL_OK);
    ck_assert_uint_eq(f->n, 2);
    const sl_facts_entry *e = sl_facts_find(f, "9.9", "P1");
    ck_assert_ptr_nonnull(e);
    ck_assert_double_eq(e->gestational_weeks, 12);
    ck_assert_str_eq(e->map[0].kind, "fetus");
    /* the plan UID wins over the patient ID */
    e = sl_facts_find(f, "1.2.3", "P1");
    ck_assert(e->pacing_dependent);
    ck_assert_double_eq(e->other[0].cgy, 5);
    ck_assert_ptr_null(sl_facts_find(f, "7.7", "P2"));
    sl_facts_free(f);
    fp = fopen(path, "w");
    fputs("format: strayline-patient-facts\npatients:\n  - key: P1\n  - key: P1\n", fp);
    fclose(fp);
    ck_assert_int_eq(sl_facts_load(path, &f, &err), SL_EINPUT);
    ck_assert_ptr_nonnull(strstr(err.msg, "given twice"));
    rm_tmp();
}
END_TEST

/* One file of a folder as the header reader would describe it. */
static sl_scan_file head_file(const char *path, sl_head_kind kind, const char *uid,
                              const char *frame, const char *ref, const char *summation)
{
    sl_scan_file f = {0};
    f.path = (char *)path;
    f.ok = true;
    f.head.kind = kind;
    snprintf(f.head.sop_instance_uid, sizeof f.head.sop_instance_uid, "%s", uid);
    snprintf(f.head.frame_uid, sizeof f.head.frame_uid, "%s", frame);
    if (kind == SL_HEAD_RTPLAN) {
        snprintf(f.head.structure_set_uid, sizeof f.head.structure_set_uid, "%s", ref);
        f.head.nbeams = f.head.electron_beams = 1;
    } else if (kind == SL_HEAD_RTDOSE) {
        snprintf(f.head.plan_ref_uid, sizeof f.head.plan_ref_uid, "%s", ref);
        snprintf(f.head.summation, sizeof f.head.summation, "%s", summation);
    }
    return f;
}

static const sl_batch_entry *entry_of(const sl_batch_entry *e, size_t n, const char *path)
{
    for (size_t i = 0; i < n; i++)
        if (e[i].plan_path && strcmp(e[i].plan_path, path) == 0)
            return &e[i];
    return NULL;
}

/* Which RT Doses of a folder go with a plan (scan.h): the Referenced RT Plan
 * and the Frame of Reference must both be the plan's (DICOM PS3.3 C.7.4.1,
 * C.8.8.3); one PLAN dose, else every BEAM dose; two PLAN doses, another
 * frame or another summation type are refused with the reason; a dose of a
 * plan not in the folder is listed, not used. */
START_TEST(rt_doses_go_with_their_plans)
{
    sl_scan_file files[] = {
        /* plan 1: one PLAN dose, one BEAM dose beside it, one of another frame */
        head_file("p1.dcm", SL_HEAD_RTPLAN, "1.1", "9.1", "2.1", NULL),
        head_file("s1.dcm", SL_HEAD_RTSTRUCT, "2.1", "9.1", "", NULL),
        head_file("d1a.dcm", SL_HEAD_RTDOSE, "3.1", "9.1", "1.1", "PLAN"),
        head_file("d1b.dcm", SL_HEAD_RTDOSE, "3.2", "9.1", "1.1", "BEAM"),
        head_file("d1c.dcm", SL_HEAD_RTDOSE, "3.3", "9.9", "1.1", "PLAN"),
        /* plan 2: two BEAM doses, both used */
        head_file("p2.dcm", SL_HEAD_RTPLAN, "1.2", "9.2", "2.2", NULL),
        head_file("s2.dcm", SL_HEAD_RTSTRUCT, "2.2", "9.2", "", NULL),
        head_file("d2a.dcm", SL_HEAD_RTDOSE, "3.4", "9.2", "1.2", "BEAM"),
        head_file("d2b.dcm", SL_HEAD_RTDOSE, "3.5", "9.2", "1.2", "BEAM"),
        /* plan 3: two PLAN doses, neither used; and a FRACTION dose */
        head_file("p3.dcm", SL_HEAD_RTPLAN, "1.3", "9.3", "2.3", NULL),
        head_file("s3.dcm", SL_HEAD_RTSTRUCT, "2.3", "9.3", "", NULL),
        head_file("d3a.dcm", SL_HEAD_RTDOSE, "3.6", "9.3", "1.3", "PLAN"),
        head_file("d3b.dcm", SL_HEAD_RTDOSE, "3.7", "9.3", "1.3", "PLAN"),
        head_file("d3c.dcm", SL_HEAD_RTDOSE, "3.8", "9.3", "1.3", "FRACTION"),
        /* a dose of a plan that is not here */
        head_file("d4.dcm", SL_HEAD_RTDOSE, "3.9", "9.4", "1.4", "PLAN"),
    };
    sl_scan_files f = {sizeof files / sizeof *files, files, 0, {0}};
    sl_batch_entry *e = NULL;
    size_t n = 0;
    sl_error err = {0};
    ck_assert_int_eq(sl_scan_pair(&f, &e, &n, &err), SL_OK);
    ck_assert_uint_eq(n, 4); /* three plans and the lone dose */
    const sl_batch_entry *p1 = entry_of(e, n, "p1.dcm"), *p2 = entry_of(e, n, "p2.dcm"),
                         *p3 = entry_of(e, n, "p3.dcm"), *d4 = entry_of(e, n, "d4.dcm");
    ck_assert_ptr_nonnull(p1);
    ck_assert_uint_eq(p1->ntps, 1);
    ck_assert_str_eq(p1->tps_paths[0], "d1a.dcm");
    ck_assert_ptr_nonnull(strstr(p1->tps_note, "d1c.dcm refused"));
    ck_assert_ptr_nonnull(strstr(p1->tps_note, "Frame of Reference"));
    ck_assert_ptr_nonnull(strstr(p1->tps_note, "d1b.dcm (BEAM) not used"));
    ck_assert_ptr_nonnull(p2);
    ck_assert_uint_eq(p2->ntps, 2);
    ck_assert_ptr_null(p2->tps_note);
    ck_assert_ptr_nonnull(p3);
    ck_assert_uint_eq(p3->ntps, 0);
    ck_assert_ptr_nonnull(strstr(p3->tps_note, "2 RT Doses of summation PLAN"));
    ck_assert_ptr_nonnull(strstr(p3->tps_note, "'FRACTION'"));
    ck_assert_ptr_nonnull(d4);
    ck_assert_int_eq(d4->outcome, SL_OUT_IGNORED);
    ck_assert_ptr_nonnull(strstr(d4->message, "not in the folder"));
    for (size_t i = 0; i < n; i++)
        sl_batch_entry_clear(&e[i]);
    free(e);
}
END_TEST

static Suite *scan_suite(void)
{
    Suite *s = suite_create("scan");
    TCase *tc = tcase_create("scan");
    tcase_set_timeout(tc, 120);
    tcase_add_test(tc, uid_grammar_of_ps3_5);
    tcase_add_test(tc, ae_titles);
    tcase_add_test(tc, sanitised_names_stay_in_their_folder);
    tcase_add_test(tc, log_takes_concurrent_writers);
    tcase_add_test(tc, log_stale_is_the_latest_screening_of_each_plan);
    tcase_add_test(tc, log_refuses_what_is_not_a_log);
    tcase_add_test(tc, facts_file);
    tcase_add_test(tc, rt_doses_go_with_their_plans);
    suite_add_tcase(s, tc);
    return s;
}

SL_CHECK_MAIN(scan_suite)
