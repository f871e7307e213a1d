/*
 * `strayline model show MODEL.yaml` and `strayline model eval MODEL.yaml
 * --energy E --applicator ID --depth CM --distance CM [--insert ID]`: what a
 * model file commissions, and the model's value at one point.
 */
#include <getopt.h>
#include <math.h>
#include <stdio.h>
#include <string.h>

#include "cli.h"
#include "strayline/model.h"
#include "strayline/util.h"

static const char help[] =
    "usage: strayline model show MODEL.yaml [--format text|json] [-o FILE]\n"
    "       strayline model eval MODEL.yaml --energy MEV --applicator ID --depth CM\n"
    "                            --distance CM [--insert ID] [--points] [--format text|json]\n"
    "                            [-o FILE]\n\n"
    "show: the machine, its applicators and inserts, and for every energy x\n"
    "applicator x insert the commissioned depths (cm), distance range (cm), output\n"
    "(cGy/MU at the central-axis maximum), fit forms and quality.\n"
    "eval: the dose in percent of the central-axis maximum at a depth below the\n"
    "surface and a distance outward from the field edge, with its standard\n"
    "uncertainty and flags. MODEL.yaml '-' is standard input.\n\n"
    "  -e, --energy MEV        nominal energy (must be commissioned)\n"
    "  -a, --applicator ID     applicator (must be commissioned)\n"
    "  -i, --insert ID         insert (default: open)\n"
    "  -d, --depth CM          depth below the surface\n"
    "  -x, --distance CM       distance from the field edge, positive outside\n"
    "  -p, --points            interpolate the measured points instead of the fitted form\n"
    "      --angle DEG         direction of the point from the central axis, 0 (IEC X,\n"
    "                          crossplane) to 90 (IEC Y, inplane); default: the highest of\n"
    "                          the directions measured\n"
    "      --applicator-distance CM  distance from the applicator's opening, for the\n"
    "                          stand-in of an uncommissioned cutout\n"
    "      --tilt DEG          beam tilt toward the point's side, signed (-89 to 89;\n"
    "                          default 0: normal incidence)\n"
    "      --ssd CM            SSD (default: the machine's nominal SSD)\n"
    "  -f, --format FMT        text (default) or json\n"
    "  -o, --output FILE       write to FILE (default, or '-': standard output)\n"
    "  -h, --help              this help\n";

int sl_cmd_model(int argc, char **argv)
{
    if (argc >= 2 && (strcmp(argv[1], "--help") == 0 || strcmp(argv[1], "-h") == 0)) {
        fputs(help, stdout);
        return SL_EXIT_OK;
    }
    if (argc < 2)
        return sl_cli_usage("model", "needs 'show' or 'eval'");
    if (strcmp(argv[1], "show") != 0 && strcmp(argv[1], "eval") != 0) {
        static const char *const subs[] = {"show", "eval"};
        const char *near = sl_cli_closest(argv[1], subs, 2);
        if (near)
            return sl_cli_usage("model", "needs 'show' or 'eval', not '%s': did you mean %s?",
                                argv[1], near);
        return sl_cli_usage("model", "needs 'show' or 'eval', not '%s'", argv[1]);
    }
    bool eval = strcmp(argv[1], "eval") == 0;
    static const struct option opts[] = {
        {"energy", required_argument, NULL, 'e'},  {"applicator", required_argument, NULL, 'a'},
        {"insert", required_argument, NULL, 'i'},  {"depth", required_argument, NULL, 'd'},
        {"distance", required_argument, NULL, 'x'}, {"points", no_argument, NULL, 'p'},
        {"format", required_argument, NULL, 'f'},  {"help", no_argument, NULL, 'h'},
        {"angle", required_argument, NULL, 'A'},
        {"applicator-distance", required_argument, NULL, 'X'},
        {"tilt", required_argument, NULL, 'T'},   {"ssd", required_argument, NULL, 'S'},
        {"output", required_argument, NULL, 'o'},
        {NULL, 0, NULL, 0},
    };
    double energy = NAN, depth = NAN, distance = NAN, angle = NAN, app_distance = NAN;
    double tilt = NAN, ssd = NAN;
    const char *applicator = NULL, *insert = NULL, *output = NULL;
    static const char shortopts[] = "e:a:i:d:x:pf:hA:X:o:T:S:";
    sl_format fmt = SL_FORMAT_TEXT;
    sl_eval_mode mode = SL_EVAL_FIT;
    int c;
    optind = 1;
    argc--;
    argv++;
    while ((c = getopt_long(argc, argv, shortopts, opts, NULL)) != -1) {
        switch (c) {
        case 'e':
            if (!sl_parse_double(optarg, &energy) || energy <= 0)
                return sl_cli_usage("model", "--energy needs an energy in MeV, not '%s'", optarg);
            break;
        case 'a': applicator = optarg; break;
        case 'i': insert = optarg; break;
        case 'd':
            if (!sl_parse_double(optarg, &depth) || depth < 0)
                return sl_cli_usage("model", "--depth needs a depth in cm, not '%s'", optarg);
            break;
        case 'x':
            if (!sl_parse_double(optarg, &distance))
                return sl_cli_usage("model", "--distance needs a distance in cm, not '%s'",
                                    optarg);
            break;
        case 'p': mode = SL_EVAL_POINTS; break;
        case 'A':
            if (!sl_parse_double(optarg, &angle) || angle < 0 || angle > 90)
                return sl_cli_usage("model",
                                    "--angle needs a direction from the central axis in degrees, "
                                    "0 (IEC X, crossplane) to 90 (IEC Y, inplane), not '%s'",
                                    optarg);
            break;
        case 'X':
            if (!sl_parse_double(optarg, &app_distance))
                return sl_cli_usage("model",
                                    "--applicator-distance needs a distance in cm, not '%s'",
                                    optarg);
            break;
        case 'T':
            if (!sl_parse_double(optarg, &tilt) || !(fabs(tilt) < 90))
                return sl_cli_usage("model",
                                    "--tilt needs a beam tilt in degrees, -89 to 89, not '%s'",
                                    optarg);
            break;
        case 'S':
            if (!sl_parse_double(optarg, &ssd) || !(ssd > 0 && ssd <= 1000))
                return sl_cli_usage("model", "--ssd needs an SSD in cm, not '%s'", optarg);
            break;
        case 'f':
            if (!sl_cli_format("model", optarg, &fmt))
                return SL_EXIT_USAGE;
            break;
        case 'o': output = optarg; break;
        case 'h': fputs(help, stdout); return SL_EXIT_OK;
        default: return sl_cli_bad_option(argv, opts, shortopts);
        }
    }
    if (argc - optind != 1)
        return sl_cli_usage("model", "needs one model file");
    if (eval && (isnan(energy) || !applicator || isnan(depth) || isnan(distance)))
        return sl_cli_usage("model", "eval needs --energy, --applicator, --depth and --distance");
    if (eval && !(fabs(distance) <= SL_MAX_DISTANCE_CM && depth <= SL_MAX_DEPTH_CM &&
                  (isnan(app_distance) || fabs(app_distance) <= SL_MAX_DISTANCE_CM)))
        return sl_cli_usage("model",
                            "distances must lie within +/-%.0f cm of the field edge and depths "
                            "within 0 to %.0f cm",
                            SL_MAX_DISTANCE_CM, SL_MAX_DEPTH_CM);
    if (!eval && (!isnan(energy) || applicator || insert || !isnan(depth) || !isnan(distance) ||
                  !isnan(angle) || !isnan(app_distance) || !isnan(tilt) || !isnan(ssd)))
        return sl_cli_usage("model", "show takes no point options (did you mean eval?)");
    sl_error err = {0};
    sl_model *m = NULL;
    int rc = SL_EXIT_OK;
    const char *inputs[] = {argv[optind]};
    sl_outfile out = {0};
    sl_model_value v;
    sl_eval_query q = {depth, distance, app_distance, angle, mode, 1.0, isnan(tilt) ? 0 : tilt,
                       ssd};
    if (sl_cli_read_model(argv[optind], &m, &err) != SL_OK ||
        (eval && sl_model_eval_query(m, energy, applicator, insert, &q, &v, &err) != SL_OK) ||
        sl_cli_output_open(&out, output ? output : "-", inputs, 1, &err) != SL_OK ||
        (eval ? sl_report_model_value(out.fp, fmt, m, energy, applicator, insert, depth,
                                      distance, &v, &err)
              : sl_report_model(out.fp, fmt, m, &err)) != SL_OK ||
        sl_cli_output_commit(&out, &err) != SL_OK) {
        sl_cli_output_abort(&out);
        rc = sl_cli_fail(&err);
    }
    sl_model_free(m);
    return rc;
}
