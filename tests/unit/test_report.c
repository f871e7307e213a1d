/*
 * Unit tests of the report layer's guard: a non-finite number in a required
 * field never reaches an output; the writer refuses it with an internal
 * error that names the field. Optional values the input did not carry are
 * written as JSON null.
 */
#include <math.h>
#include <stdio.h>
#include <string.h>

#include "check_main.h"
#include "strayline/report.h"

static sl_plan *tiny_plan(sl_beam *beam)
{
    static sl_plan p;
    memset(&p, 0, sizeof p);
    memset(beam, 0, sizeof *beam);
    p.source = "tiny.dcm";
    p.sop_instance_uid = "1.2.3";
    beam->number = 1;
    beam->radiation_type = "ELECTRON";
    beam->delivery_type = "TREATMENT";
    beam->beam_type = "STATIC";
    beam->sad_mm = 1000;
    beam->energy_mev = 9;
    beam->gantry_deg = beam->collimator_deg = beam->couch_deg = 0;
    beam->ssd_mm = NAN; /* optional: null */
    beam->setup_number = -1;
    beam->applicator.opening_mm = beam->applicator.opening_x_mm = NAN;
    beam->applicator.opening_y_mm = beam->applicator.source_to_applicator_mm = NAN;
    p.nbeams = 1;
    p.beams = beam;
    return &p;
}

START_TEST(optional_values_become_null)
{
    sl_beam beam;
    sl_dicom_object obj = {SL_DICOM_RTPLAN, tiny_plan(&beam), NULL};
    char *text = NULL;
    size_t n = 0;
    FILE *fp = open_memstream(&text, &n);
    sl_error e = {0};
    ck_assert_int_eq(sl_report_inspect(fp, SL_FORMAT_JSON, &obj, 1, &e), SL_OK);
    fclose(fp);
    ck_assert_ptr_nonnull(strstr(text, "\"ssd_cm\": null"));
    ck_assert_ptr_null(strstr(text, "NaN"));
    ck_assert_ptr_null(strstr(text, "nan"));
    free(text);
}
END_TEST

START_TEST(a_non_finite_required_value_is_refused)
{
    sl_beam beam;
    sl_dicom_object obj = {SL_DICOM_RTPLAN, tiny_plan(&beam), NULL};
    beam.sad_mm = NAN; /* required: a bug upstream if it got here */
    char *text = NULL;
    size_t n = 0;
    FILE *fp = open_memstream(&text, &n);
    sl_error e = {0};
    ck_assert_int_eq(sl_report_inspect(fp, SL_FORMAT_JSON, &obj, 1, &e), SL_EINTERNAL);
    fclose(fp);
    ck_assert_ptr_nonnull(strstr(e.msg, "non-finite value for 'sad_cm'"));
    ck_assert_uint_eq(n, 0); /* nothing half-written */
    free(text);
    beam.sad_mm = INFINITY;
    fp = open_memstream(&text, &n);
    ck_assert_int_eq(sl_report_inspect(fp, SL_FORMAT_JSON, &obj, 1, &e), SL_EINTERNAL);
    fclose(fp);
    free(text);
}
END_TEST

static Suite *report_suite(void)
{
    Suite *s = suite_create("report");
    TCase *tc = tcase_create("report");
    tcase_add_test(tc, optional_values_become_null);
    tcase_add_test(tc, a_non_finite_required_value_is_refused);
    suite_add_tcase(s, tc);
    return s;
}

SL_CHECK_MAIN(report_suite)
