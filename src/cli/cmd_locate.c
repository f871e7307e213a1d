/*
 * `strayline locate PLAN STRUCTURES`: where each organ lies relative to each
 * electron field (distance from the field edge, depth), per beam.
 */
#include <getopt.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "cli.h"
#include "strayline/dicom.h"
#include "strayline/locate.h"
#include "strayline/machine.h"
#include "strayline/model.h"
#include "strayline/util.h"

static const char help[] =
    "usage: strayline locate [OPTIONS] PLAN STRUCTURES\n\n"
    "For every TREATMENT electron beam of the RT Plan and every ROI of the RT\n"
    "Structure Set: volume (cm3), samples, signed distance from the field edge\n"
    "(cm, positive outside; minimum, mean, maximum), depth below the body surface\n"
    "along the ray from the source (cm), fraction of the volume inside the field,\n"
    "distance from the applicator outline (cm); per beam the central-axis entry\n"
    "point, the SSD found there against the plan's (cm) and the surface obliquity\n"
    "(deg). Organs in or touching the field are marked: out-of-field models do not\n"
    "apply there. PLAN or STRUCTURES may be '-': standard input.\n\n"
    "  -f, --format FMT        text (default) or json\n"
    "  -o, --output FILE       write the table to FILE (default, or '-': standard output)\n"
    "  -m, --model FILE        model file whose applicator catalogue gives the field\n"
    "                          size when the plan has no cutout and no applicator\n"
    "                          geometry\n"
    "  -d, --depth CM          use this depth for every organ (needed when the\n"
    "                          structure set has no EXTERNAL ROI)\n"
    "      --no-bolus          leave the plan's bolus out of depths (to see what it\n"
    "                          adds; by default it is counted)\n"
    "      --allow-mismatch    go on when the plan and the structure set do not\n"
    "                          belong together (a warning is written in the output)\n"
    "      --include-external  report the EXTERNAL ROI as an organ too\n"
    "  -j, --threads N         threads to use (default: every core)\n"
    "  -h, --help              this help\n";

int sl_cmd_locate(int argc, char **argv)
{
    enum { OPT_MISMATCH = 256, OPT_EXTERNAL, OPT_NO_BOLUS };
    static const struct option opts[] = {
        {"format", required_argument, NULL, 'f'},
        {"output", required_argument, NULL, 'o'},
        {"model", required_argument, NULL, 'm'},
        {"depth", required_argument, NULL, 'd'},
        {"allow-mismatch", no_argument, NULL, OPT_MISMATCH},
        {"include-external", no_argument, NULL, OPT_EXTERNAL},
        {"no-bolus", no_argument, NULL, OPT_NO_BOLUS},
        {"threads", required_argument, NULL, 'j'},
        {"help", no_argument, NULL, 'h'},
        {NULL, 0, NULL, 0},
    };
    sl_format fmt = SL_FORMAT_TEXT;
    sl_locate_options lopt;
    sl_locate_default_options(&lopt);
    bool allow_mismatch = false;
    const char *model_path = NULL, *output = NULL;
    static const char shortopts[] = "f:o:m:d:j:h";
    int c;
    optind = 1;
    while ((c = getopt_long(argc, argv, shortopts, opts, NULL)) != -1) {
        switch (c) {
        case 'f':
            if (!sl_cli_format("locate", optarg, &fmt))
                return SL_EXIT_USAGE;
            if (fmt == SL_FORMAT_CSV)
                return sl_cli_usage("locate", "--format csv is not offered by locate");
            break;
        case 'm':
            model_path = optarg;
            break;
        case 'o':
            output = optarg;
            break;
        case 'd':
            if (!sl_parse_double(optarg, &lopt.depth_cm) || lopt.depth_cm < 0)
                return sl_cli_usage("locate", "--depth needs a depth in cm, not '%s'", optarg);
            break;
        case 'j':
            if (!sl_parse_int(optarg, &lopt.threads) || lopt.threads < 1 || lopt.threads > 64)
                return sl_cli_usage("locate", "--threads needs a number from 1 to 64");
            break;
        case OPT_MISMATCH:
            allow_mismatch = true;
            break;
        case OPT_EXTERNAL:
            lopt.include_external = true;
            break;
        case OPT_NO_BOLUS:
            lopt.no_bolus = true;
            break;
        case 'h':
            fputs(help, stdout);
            return SL_EXIT_OK;
        default:
            return sl_cli_bad_option(argv, opts, shortopts);
        }
    }
    if (argc - optind != 2)
        return sl_cli_usage("locate", "needs two files: PLAN STRUCTURES");
    if (sl_cli_is_stdio(argv[optind]) + sl_cli_is_stdio(argv[optind + 1]) +
            sl_cli_is_stdio(model_path) > 1)
        return sl_cli_usage("locate", "only one file can be read from standard input ('-')");
    sl_error err = {0};
    sl_plan *plan = NULL;
    sl_structure_set *ss = NULL;
    sl_location *loc = NULL;
    sl_model *model = NULL;
    sl_applicator_size *catalogue = NULL;
    int rc = SL_EXIT_OK;
    if (model_path && (sl_cli_read_model(model_path, &model, &err) != SL_OK ||
                       sl_machine_catalogue(&model->machine, &catalogue, &lopt.ncatalogue, &err) !=
                           SL_OK)) {
        rc = sl_cli_fail(&err);
        sl_model_free(model);
        return rc;
    }
    lopt.catalogue = catalogue;
    const char *inputs[] = {argv[optind], argv[optind + 1], model_path};
    sl_outfile out = {0};
    if (sl_cli_read_plan(argv[optind], &plan, &err) != SL_OK ||
        sl_cli_read_structures(argv[optind + 1], &ss, &err) != SL_OK ||
        sl_pair_check(plan, ss, allow_mismatch, &err) != SL_OK ||
        sl_locate(plan, ss, &lopt, &loc, &err) != SL_OK ||
        sl_cli_output_open(&out, output ? output : "-", inputs, 3, &err) != SL_OK ||
        sl_report_locate(out.fp, fmt, plan, ss, loc, &err) != SL_OK ||
        sl_cli_output_commit(&out, &err) != SL_OK) {
        sl_cli_output_abort(&out);
        rc = sl_cli_fail(&err);
    }
    sl_location_free(loc);
    sl_structure_set_free(ss);
    sl_plan_free(plan);
    free(catalogue);
    sl_model_free(model);
    return rc;
}
