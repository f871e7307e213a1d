/*
 * Unit tests of the DICOM bridge and the plan / structure set checks, on the
 * shipped demo case (whose values are set in examples/generator/make_cases.py)
 * and on in-memory copies of it, the way the fuzzers call the reader.
 */
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "check_main.h"
#include "strayline/dicom.h"
#include "strayline/util.h"

static char *demo(const char *c, const char *f)
{
    static char path[4][1024];
    static int k;
    k = (k + 1) % 4;
    snprintf(path[k], sizeof path[k], "%s/examples/%s/%s", sl_test_source_root(), c, f);
    return path[k];
}

START_TEST(reads_the_face_lens_plan)
{
    sl_plan *p = NULL;
    sl_error e = {0};
    ck_assert_int_eq(sl_dicom_read_plan(demo("face-lens", "rtplan.dcm"), &p, &e), SL_OK);
    ck_assert_str_eq(p->label, "FACE_E09");
    /* RT Approval and General Study values as pydicom reads them from the
     * demo file (written by examples/generator/rtbuild.py); absent ones NULL */
    ck_assert_str_eq(p->approval_status, "UNAPPROVED");
    ck_assert_ptr_null(p->review_date);
    ck_assert_ptr_null(p->review_time);
    ck_assert_ptr_null(p->reviewer_name);
    ck_assert_str_eq(p->study_uid, "2.25.322474563938497795561754309957590049564");
    ck_assert_uint_eq(p->nbeams, 2);
    const sl_beam *b = sl_plan_find_beam(p, 1);
    ck_assert_ptr_nonnull(b);
    ck_assert_double_eq(b->energy_mev, 9.0);
    ck_assert_double_eq(b->gantry_deg, 45.0);
    ck_assert_double_eq(b->sad_mm, 1000.0);
    ck_assert(!b->sad_defaulted);
    ck_assert_double_eq(b->ssd_mm, 1000.0);
    ck_assert_str_eq(b->applicator.id, "A06");
    ck_assert_uint_eq(b->nblocks, 1);
    ck_assert_uint_eq(b->blocks[0].npoints, 9);
    ck_assert_double_eq(b->blocks[0].points[0].x, -22.0);
    ck_assert_double_eq(b->blocks[0].points[0].y, -14.0);
    ck_assert_int_eq(b->blocks[0].type, SL_BLOCK_APERTURE);
    ck_assert_ptr_null(sl_beam_skip_reason(b));
    ck_assert_ptr_nonnull(sl_beam_skip_reason(sl_plan_find_beam(p, 2)));
    ck_assert_uint_eq(p->ngroups, 1);
    ck_assert_int_eq(p->groups[0].fractions, 15);
    ck_assert_double_eq(p->groups[0].refs[0].meterset_mu, 350.0);
    ck_assert_double_eq(p->groups[0].refs[0].beam_dose_gy, 3.0);
    ck_assert_double_eq(p->dose_refs[0].target_prescription_gy, 45.0);
    sl_position pos;
    ck_assert_int_eq(sl_plan_beam_position(p, b, &pos, &e), SL_OK);
    ck_assert_int_eq(pos, SL_POS_HFS);
    sl_plan_free(p);
}
END_TEST

START_TEST(buffer_and_file_readers_agree)
{
    char *data;
    size_t n;
    sl_error e = {0};
    const char *path = demo("face-lens", "rtstruct.dcm");
    ck_assert_int_eq(sl_read_file(path, SL_DICOM_MAX_FILE_BYTES, &data, &n, &e), SL_OK);
    sl_dicom_object a, b;
    ck_assert_int_eq(sl_dicom_read(path, &a, &e), SL_OK);
    ck_assert_int_eq(sl_dicom_read_buffer(data, n, "mem", &b, &e), SL_OK);
    ck_assert_int_eq(a.kind, SL_DICOM_RTSTRUCT);
    ck_assert_int_eq(b.kind, SL_DICOM_RTSTRUCT);
    ck_assert_uint_eq(a.structures->nrois, b.structures->nrois);
    for (size_t i = 0; i < a.structures->nrois; i++) {
        const sl_roi *ra = &a.structures->rois[i], *rb = &b.structures->rois[i];
        ck_assert_str_eq(ra->name, rb->name);
        ck_assert_uint_eq(sl_roi_point_count(ra), sl_roi_point_count(rb));
        ck_assert_mem_eq(ra->contours[0].points, rb->contours[0].points,
                         ra->contours[0].npoints * sizeof(sl_vec3));
    }
    const sl_roi *ext;
    ck_assert_int_eq(sl_structures_external(a.structures, &ext, &e), SL_OK);
    ck_assert_str_eq(ext->name, "BODY");
    ck_assert_ptr_nonnull(sl_structures_find(a.structures, "Lens_L"));
    /* a truncated buffer is an input error, never a crash */
    sl_dicom_object c;
    for (size_t cut = 0; cut < n; cut += n / 7 + 1) {
        sl_status st = sl_dicom_read_buffer(data, cut, "cut", &c, &e);
        ck_assert_int_eq(st, SL_EINPUT);
    }
    sl_dicom_object_free(&a);
    sl_dicom_object_free(&b);
    free(data);
}
END_TEST

START_TEST(pairing_accepts_its_own_and_refuses_another)
{
    sl_plan *p;
    sl_structure_set *own, *other;
    sl_error e = {0};
    ck_assert_int_eq(sl_dicom_read_plan(demo("face-lens", "rtplan.dcm"), &p, &e), SL_OK);
    ck_assert_int_eq(sl_dicom_read_structures(demo("face-lens", "rtstruct.dcm"), &own, &e), SL_OK);
    ck_assert_int_eq(sl_dicom_read_structures(demo("chest-fetus", "rtstruct.dcm"), &other, &e),
                     SL_OK);
    ck_assert_int_eq(sl_pair_check(p, own, false, &e), SL_OK);
    ck_assert_int_eq(sl_pair_check(p, other, false, &e), SL_EINPUT);
    ck_assert_ptr_nonnull(strstr(e.msg, p->structure_set_uid));
    ck_assert_ptr_nonnull(strstr(e.msg, other->sop_instance_uid));
    ck_assert_uint_eq(p->notes.count, 0);
    ck_assert_int_eq(sl_pair_check(p, other, true, &e), SL_OK);
    ck_assert_uint_eq(p->notes.count, 1);
    ck_assert_ptr_nonnull(strstr(p->notes.items[0], "MISMATCH ALLOWED"));
    ck_assert_uint_eq(other->notes.count, 1);
    sl_plan_free(p);
    sl_structure_set_free(own);
    sl_structure_set_free(other);
}
END_TEST

START_TEST(kind_mismatch_is_reported)
{
    sl_plan *p;
    sl_structure_set *s;
    sl_error e = {0};
    ck_assert_int_eq(sl_dicom_read_plan(demo("face-lens", "rtstruct.dcm"), &p, &e), SL_EINPUT);
    ck_assert_ptr_nonnull(strstr(e.msg, "an RT Plan was expected"));
    ck_assert_int_eq(sl_dicom_read_structures(demo("face-lens", "rtplan.dcm"), &s, &e),
                     SL_EINPUT);
    ck_assert_ptr_nonnull(strstr(e.msg, "an RT Structure Set was expected"));
    ck_assert_int_eq(sl_dicom_read_plan("/nonexistent/plan.dcm", &p, &e), SL_EINPUT);
    ck_assert_ptr_nonnull(strstr(e.msg, "/nonexistent/plan.dcm"));
}
END_TEST

START_TEST(a_point_beside_roi_number_int_max_gets_a_free_number)
{
    /* ROI numbers are signed 32-bit (IS, PS3.5 6.2): the next number after
     * 2147483647 must not overflow (UBSan found it) */
    sl_structure_set *ss = NULL;
    sl_error e = {0};
    ck_assert_int_eq(sl_dicom_read_structures(demo("face-lens", "rtstruct.dcm"), &ss, &e),
                     SL_OK);
    ck_assert_uint_ge(ss->nrois, 2);
    ss->rois[0].number = 2147483647;
    ss->rois[1].number = 1;
    sl_vec3 p = {0, 0, 0};
    ck_assert_int_eq(sl_structures_add_point(ss, "probe", "MARKER", p, &e), SL_OK);
    const sl_roi *r = sl_structures_find(ss, "probe");
    ck_assert_ptr_nonnull(r);
    ck_assert_int_gt(r->number, 0);
    for (size_t i = 0; i + 1 < ss->nrois; i++)
        ck_assert_int_ne(ss->rois[i].number, r->number);
    sl_structure_set_free(ss);
}
END_TEST

START_TEST(positions_round_trip)
{
    for (int i = 0; i < SL_POS_COUNT; i++) {
        sl_position p;
        ck_assert(sl_position_parse(sl_position_code((sl_position)i), &p));
        ck_assert_int_eq(p, i);
    }
    sl_position p;
    ck_assert(!sl_position_parse("SITTING", &p));
    ck_assert(!sl_position_parse("hfs", &p));
    ck_assert_ptr_null(sl_position_code(SL_POS_COUNT));
}
END_TEST

static Suite *dicom_suite(void)
{
    Suite *s = suite_create("dicom");
    TCase *tc = tcase_create("dicom");
    tcase_set_timeout(tc, 60);
    tcase_add_test(tc, reads_the_face_lens_plan);
    tcase_add_test(tc, buffer_and_file_readers_agree);
    tcase_add_test(tc, pairing_accepts_its_own_and_refuses_another);
    tcase_add_test(tc, kind_mismatch_is_reported);
    tcase_add_test(tc, positions_round_trip);
    tcase_add_test(tc, a_point_beside_roi_number_int_max_gets_a_free_number);
    suite_add_tcase(s, tc);
    return s;
}

SL_CHECK_MAIN(dicom_suite)
