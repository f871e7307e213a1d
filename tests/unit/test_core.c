/*
 * Unit tests of src/core: strict number parsing, note lists, SHA-256 and
 * atomic output files.
 */
#include <math.h>
#include <stdio.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>

#include "check_main.h"
#include "strayline/util.h"

START_TEST(parse_double_accepts_decimal_notation)
{
    double v = 0;
    ck_assert(sl_parse_double("12.5", &v));
    ck_assert_double_eq(v, 12.5);
    ck_assert(sl_parse_double("  -3e-2 ", &v));
    ck_assert_double_eq_tol(v, -0.03, 1e-15);
    ck_assert(sl_parse_double("+7", &v));
    ck_assert_double_eq(v, 7.0);
}
END_TEST

START_TEST(parse_double_refuses_what_is_not_a_finite_number)
{
    double v = 42;
    const char *bad[] = {"", "   ", "12abc", "nan", "NaN", "inf", "-Infinity", "1e999",
                         "0x10", "1,5", "--1", "."};
    for (size_t i = 0; i < sizeof bad / sizeof *bad; i++)
        ck_assert_msg(!sl_parse_double(bad[i], &v), "accepted '%s'", bad[i]);
    ck_assert_double_eq(v, 42); /* untouched on failure */
    ck_assert(!sl_parse_double(NULL, &v));
}
END_TEST

START_TEST(parse_int_checks_range_and_garbage)
{
    int v = 0;
    ck_assert(sl_parse_int("-17", &v));
    ck_assert_int_eq(v, -17);
    ck_assert(!sl_parse_int("2147483648", &v));
    ck_assert(!sl_parse_int("3.5", &v));
    ck_assert(!sl_parse_int("", &v));
}
END_TEST

/* A value below a level never prints as the level (a status "below 50.0"
 * beside an upper bound printed "50.0"; found by an independent review). */
START_TEST(decimals_below_never_print_a_value_as_its_level)
{
    char b[64];
    int d = sl_decimals_below(49.9699, 50.0, 1);
    snprintf(b, sizeof b, "%.*f", d, 49.9699);
    ck_assert_str_eq(b, "49.97");
    ck_assert_int_eq(sl_decimals_below(49.94, 50.0, 1), 1);  /* 49.9 already below */
    ck_assert_int_eq(sl_decimals_below(50.0, 50.0, 1), 1);   /* at the level: as it is */
    ck_assert_int_eq(sl_decimals_below(73.2, 50.0, 1), 1);   /* above: as it is */
    ck_assert_int_eq(sl_decimals_below(NAN, 50.0, 1), 1);
    ck_assert_int_eq(sl_decimals_below(4.0, NAN, 1), 1);
    d = sl_decimals_below(4.9999999999, 5.0, 1);             /* at most 6 decimals */
    ck_assert_int_eq(d, 6);
}
END_TEST

START_TEST(notes_keep_one_copy_of_each_text)
{
    sl_notes n = {0};
    ck_assert_int_eq(sl_notes_add(&n, "beam %d: %s", 1, "warn"), SL_OK);
    ck_assert_int_eq(sl_notes_add(&n, "beam %d: %s", 1, "warn"), SL_OK);
    ck_assert_int_eq(sl_notes_add(&n, "beam %d: %s", 2, "warn"), SL_OK);
    ck_assert_uint_eq(n.count, 2);
    ck_assert_str_eq(n.items[1], "beam 2: warn");
    sl_notes m = {0};
    ck_assert_int_eq(sl_notes_extend(&m, &n), SL_OK);
    ck_assert_uint_eq(m.count, 2);
    sl_notes_free(&n);
    sl_notes_free(&m);
    ck_assert_uint_eq(n.count, 0);
}
END_TEST

START_TEST(error_messages_are_bounded_and_prefixed)
{
    sl_error e = {0};
    char longtext[3000];
    memset(longtext, 'x', sizeof longtext - 1);
    longtext[sizeof longtext - 1] = '\0';
    ck_assert_int_eq(sl_error_set(&e, SL_EINPUT, "%s", longtext), SL_EINPUT);
    ck_assert_uint_eq(strlen(e.msg), SL_ERROR_MSG_MAX - 1);
    sl_error_set(&e, SL_EINPUT, "element: bad");
    sl_error_prefix(&e, "file.dcm");
    ck_assert_str_eq(e.msg, "file.dcm: element: bad");
    ck_assert_int_eq(sl_error_set(NULL, SL_EUSAGE, "ignored"), SL_EUSAGE);
}
END_TEST

/* FIPS 180-2, Appendix B.1: SHA-256("abc"). */
START_TEST(sha256_matches_fips_180_2_example)
{
    char hex[SL_SHA256_HEX_LEN];
    sl_sha256_buffer("abc", 3, hex);
    ck_assert_str_eq(hex, "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad");
    char path[] = "/tmp/sl_sha_XXXXXX";
    int fd = mkstemp(path);
    ck_assert_int_ge(fd, 0);
    ck_assert_int_eq(write(fd, "abc", 3), 3);
    close(fd);
    sl_error e = {0};
    char hex2[SL_SHA256_HEX_LEN];
    ck_assert_int_eq(sl_sha256_file(path, hex2, &e), SL_OK);
    ck_assert_str_eq(hex2, hex);
    unlink(path);
    ck_assert_int_eq(sl_sha256_file("/nonexistent/x", hex2, &e), SL_EINPUT);
}
END_TEST

START_TEST(outfile_is_atomic_and_never_overwrites_an_input)
{
    char dir[] = "/tmp/sl_out_XXXXXX";
    ck_assert_ptr_nonnull(mkdtemp(dir));
    char target[256], input[256];
    snprintf(target, sizeof target, "%s/report.txt", dir);
    snprintf(input, sizeof input, "%s/plan.dcm", dir);
    FILE *fp = fopen(input, "w");
    fputs("input", fp);
    fclose(fp);

    sl_error e = {0};
    sl_outfile out;
    const char *inputs[] = {input};
    ck_assert_int_eq(sl_outfile_open(&out, input, inputs, 1, &e), SL_EUSAGE);
    ck_assert_ptr_nonnull(strstr(e.msg, "refusing to write over an input"));

    ck_assert_int_eq(sl_outfile_open(&out, target, inputs, 1, &e), SL_OK);
    fputs("half", out.fp);
    fflush(out.fp);
    struct stat sb;
    ck_assert_int_ne(stat(target, &sb), 0); /* not visible before commit */
    ck_assert_int_eq(sl_outfile_commit(&out, &e), SL_OK);
    ck_assert_int_eq(stat(target, &sb), 0);
    ck_assert_int_eq((int)sb.st_size, 4);

    ck_assert_int_eq(sl_outfile_open(&out, target, NULL, 0, &e), SL_OK);
    fputs("aborted", out.fp);
    sl_outfile_abort(&out);
    ck_assert_int_eq(stat(target, &sb), 0);
    ck_assert_int_eq((int)sb.st_size, 4); /* the old file is untouched */
    unlink(target);
    unlink(input);
    rmdir(dir);
}
END_TEST

START_TEST(read_file_enforces_its_limit)
{
    char path[] = "/tmp/sl_rd_XXXXXX";
    int fd = mkstemp(path);
    ck_assert_int_eq(write(fd, "0123456789", 10), 10);
    close(fd);
    char *data;
    size_t n;
    sl_error e = {0};
    ck_assert_int_eq(sl_read_file(path, 9, &data, &n, &e), SL_EINPUT);
    ck_assert_ptr_nonnull(strstr(e.msg, "limit"));
    ck_assert_int_eq(sl_read_file(path, 10, &data, &n, &e), SL_OK);
    ck_assert_uint_eq(n, 10);
    ck_assert_str_eq(data, "0123456789");
    free(data);
    unlink(path);
}
END_TEST

static Suite *core_suite(void)
{
    Suite *s = suite_create("core");
    TCase *tc = tcase_create("core");
    tcase_add_test(tc, parse_double_accepts_decimal_notation);
    tcase_add_test(tc, parse_double_refuses_what_is_not_a_finite_number);
    tcase_add_test(tc, parse_int_checks_range_and_garbage);
    tcase_add_test(tc, decimals_below_never_print_a_value_as_its_level);
    tcase_add_test(tc, notes_keep_one_copy_of_each_text);
    tcase_add_test(tc, error_messages_are_bounded_and_prefixed);
    tcase_add_test(tc, sha256_matches_fips_180_2_example);
    tcase_add_test(tc, outfile_is_atomic_and_never_overwrites_an_input);
    tcase_add_test(tc, read_file_enforces_its_limit);
    suite_add_tcase(s, tc);
    return s;
}

SL_CHECK_MAIN(core_suite)
