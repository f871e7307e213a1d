/*
 * `strayline inspect FILE...`: read DICOM RT Plans and Structure Sets and
 * print what strayline understood of them, so that a user can check an export
 * before estimating anything.
 */
#include <getopt.h>
#include <stdlib.h>
#include <string.h>

#include "cli.h"
#include "strayline/dicom.h"

static const char help[] =
    "usage: strayline inspect [--format text|json] [-o FILE] FILE...\n\n"
    "Summarise each DICOM RT Plan or RT Structure Set: for a plan its electron\n"
    "beams (energy MeV, applicator, cutout, SSD cm, angles deg, MU, fractions,\n"
    "patient setup) and the beams skipped and why; for a structure set its ROIs\n"
    "(name, type, contours, points, slice range cm). A FILE '-' is standard input.\n\n"
    "  -f, --format FMT   text (default) or json\n"
    "  -o, --output FILE  write the summary to FILE (default, or '-': standard output)\n"
    "  -h, --help         this help\n";

int sl_cmd_inspect(int argc, char **argv)
{
    static const struct option opts[] = {
        {"format", required_argument, NULL, 'f'},
        {"output", required_argument, NULL, 'o'},
        {"help", no_argument, NULL, 'h'},
        {NULL, 0, NULL, 0},
    };
    sl_format fmt = SL_FORMAT_TEXT;
    const char *output = NULL;
    static const char shortopts[] = "f:o:h";
    int c;
    optind = 1;
    while ((c = getopt_long(argc, argv, shortopts, opts, NULL)) != -1) {
        switch (c) {
        case 'f':
            if (!sl_cli_format("inspect", optarg, &fmt))
                return SL_EXIT_USAGE;
            if (fmt == SL_FORMAT_CSV)
                return sl_cli_usage("inspect", "--format csv is not offered by inspect");
            break;
        case 'o': output = optarg; break;
        case 'h':
            fputs(help, stdout);
            return SL_EXIT_OK;
        default:
            return sl_cli_bad_option(argv, opts, shortopts);
        }
    }
    int nfiles = argc - optind;
    if (nfiles < 1)
        return sl_cli_usage("inspect", "no file given");
    int nstdin = 0;
    for (int i = optind; i < argc; i++)
        nstdin += sl_cli_is_stdio(argv[i]);
    if (nstdin > 1)
        return sl_cli_usage("inspect", "'-' (standard input) given %d times", nstdin);
    sl_dicom_object *objs = calloc((size_t)nfiles, sizeof *objs);
    if (!objs) {
        sl_cli_error("out of memory");
        return SL_EXIT_INTERNAL;
    }
    sl_error err = {0};
    int rc = SL_EXIT_OK;
    int nread = 0;
    for (; nread < nfiles; nread++) {
        if (sl_cli_read_dicom(argv[optind + nread], &objs[nread], &err) != SL_OK) {
            rc = sl_cli_fail(&err);
            break;
        }
    }
    sl_outfile out = {0};
    if (rc == SL_EXIT_OK) {
        const char *const *inputs = (const char *const *)argv + optind;
        if (sl_cli_output_open(&out, output ? output : "-", inputs, (size_t)nfiles, &err) !=
                SL_OK ||
            sl_report_inspect(out.fp, fmt, objs, (size_t)nread, &err) != SL_OK ||
            sl_cli_output_commit(&out, &err) != SL_OK) {
            sl_cli_output_abort(&out);
            rc = sl_cli_fail(&err);
        }
    }
    for (int i = 0; i < nread; i++)
        sl_dicom_object_free(&objs[i]);
    free(objs);
    return rc;
}
