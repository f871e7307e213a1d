/*
 * Shared main() for the Check unit tests: run one suite in this process
 * (no fork, so the sanitizers see every test) and report it as TAP on
 * standard output, which meson's 'tap' protocol counts test by test.
 */
#ifndef STRAYLINE_TEST_CHECK_MAIN_H
#define STRAYLINE_TEST_CHECK_MAIN_H

#include <check.h>
#include <stdlib.h>

#define SL_CHECK_MAIN(suite_fn)                                                               \
    int main(void)                                                                            \
    {                                                                                         \
        SRunner *sr = srunner_create(suite_fn());                                             \
        srunner_set_fork_status(sr, CK_NOFORK);                                               \
        srunner_set_tap(sr, "-");                                                             \
        srunner_run_all(sr, CK_SILENT);                                                       \
        int failed = srunner_ntests_failed(sr);                                               \
        srunner_free(sr);                                                                     \
        return failed ? EXIT_FAILURE : EXIT_SUCCESS;                                          \
    }

/* Source and build directories, passed by meson. */
static inline const char *sl_test_source_root(void)
{
    const char *s = getenv("SL_SOURCE_ROOT");
    return s ? s : ".";
}

#endif
