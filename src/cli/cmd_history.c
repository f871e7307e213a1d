/*
 * `strayline history`: what the screening log holds, filtered by flag,
 * patient and date; with --stale MODEL.yaml, the plans whose latest
 * screening used another version of that machine's model (the ones to
 * screen again after a recommissioning).
 */
#include <getopt.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "cli.h"
#include "strayline/model.h"
#include "strayline/screenlog.h"

static const char help[] =
    "usage: strayline history [--log FILE] [OPTIONS]\n\n"
    "List the screenings recorded by 'scan' and 'listen', oldest first, with\n"
    "each flagged organ's course dose (cGy), upper bound (cGy) and level (Gy),\n"
    "and the organs with action levels that were not judged.\n\n"
    "  -L, --log FILE         the screening log (default: screening.sqlite here)\n"
    "      --flagged          only screenings that flagged the plan\n"
    "      --attention        only screenings that flagged the plan or left an\n"
    "                         organ with action levels not judged\n"
    "      --patient ID       only this patient ID\n"
    "      --since DATE       only screenings on or after DATE (YYYY-MM-DD, UTC)\n"
    "      --stale MODEL.yaml only plans whose latest screening used another\n"
    "                         version (SHA-256) of this machine's model\n"
    "  -f, --format FMT       text (default), json or csv\n"
    "  -h, --help             this help\n";

enum { OPT_FLAGGED = 256, OPT_ATTENTION, OPT_PATIENT, OPT_SINCE, OPT_STALE };

/* YYYY-MM-DD, a real calendar date. */
static bool date_ok(const char *s)
{
    int y, m, d;
    char tail;
    if (strlen(s) != 10 || s[4] != '-' || s[7] != '-' ||
        sscanf(s, "%4d-%2d-%2d%c", &y, &m, &d, &tail) != 3)
        return false;
    for (int i = 0; i < 10; i++)
        if (i != 4 && i != 7 && (s[i] < '0' || s[i] > '9'))
            return false;
    static const int days[] = {31, 29, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31};
    if (y < 1900 || m < 1 || m > 12 || d < 1 || d > days[m - 1])
        return false;
    bool leap = (y % 4 == 0 && y % 100 != 0) || y % 400 == 0;
    return !(m == 2 && d == 29 && !leap);
}

int sl_cmd_history(int argc, char **argv)
{
    static const struct option opts[] = {
        {"log", required_argument, NULL, 'L'},
        {"flagged", no_argument, NULL, OPT_FLAGGED},
        {"attention", no_argument, NULL, OPT_ATTENTION},
        {"patient", required_argument, NULL, OPT_PATIENT},
        {"since", required_argument, NULL, OPT_SINCE},
        {"stale", required_argument, NULL, OPT_STALE},
        {"format", required_argument, NULL, 'f'},
        {"help", no_argument, NULL, 'h'},
        {NULL, 0, NULL, 0},
    };
    const char *log_path = "screening.sqlite", *stale = NULL;
    sl_history_query q = {0};
    sl_format fmt = SL_FORMAT_TEXT;
    int c;
    optind = 1;
    static const char shortopts[] = "L:f:h";
    while ((c = getopt_long(argc, argv, shortopts, opts, NULL)) != -1) {
        switch (c) {
        case 'L': log_path = optarg; break;
        case OPT_FLAGGED: q.flagged_only = true; break;
        case OPT_ATTENTION: q.attention_only = true; break;
        case OPT_PATIENT: q.patient_id = optarg; break;
        case OPT_SINCE:
            if (!date_ok(optarg))
                return sl_cli_usage("history", "--since needs a date YYYY-MM-DD, not '%s'",
                                    optarg);
            q.since = optarg;
            break;
        case OPT_STALE: stale = optarg; break;
        case 'f':
            if (!sl_cli_format("history", optarg, &fmt))
                return SL_EXIT_USAGE;
            break;
        case 'h': fputs(help, stdout); return SL_EXIT_OK;
        default: return sl_cli_bad_option(argv, opts, shortopts);
        }
    }
    if (optind != argc)
        return sl_cli_usage("history", "takes no file arguments (the log is --log FILE)");
    sl_error err = {0};
    sl_model *model = NULL;
    sl_screenlog *log = NULL;
    sl_history *h = NULL;
    int rc = SL_EXIT_OK;
    if (stale) {
        if (sl_model_load(stale, &model, &err) != SL_OK) {
            rc = sl_cli_fail(&err);
            goto done;
        }
        q.stale_machine = model->machine.name;
        q.stale_sha256 = model->sha256;
    }
    if (sl_screenlog_open(log_path, false, &log, &err) != SL_OK ||
        sl_screenlog_query(log, &q, &h, &err) != SL_OK ||
        sl_report_history(stdout, fmt, h, &err) != SL_OK) {
        rc = sl_cli_fail(&err);
        goto done;
    }
    if (fflush(stdout) != 0) {
        sl_cli_error("output error: cannot write to standard output");
        rc = SL_EXIT_INTERNAL;
    }
done:
    sl_history_free(h);
    sl_screenlog_close(log);
    sl_model_free(model);
    return rc;
}
