/*
 * Unit tests of the batch modules: the UID grammar (DICOM PS3.5 section 9.1),
 * AE titles (PS3.5 section 6.2, AE value representation), name
 * sanitising, the screening log (SQLite: concurrent writers, stale
 * queries, schema version) and the per-patient facts file.
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
    suite_add_tcase(s, tc);
    return s;
}

SL_CHECK_MAIN(scan_suite)
