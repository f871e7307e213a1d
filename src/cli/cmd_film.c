/*
 * `strayline film calibrate CALIBRATION.yaml -o CURVE.yaml [-r REPORT.html]`
 * and `strayline film profile FILMS.yaml --curve CURVE.yaml --out DIR`: from
 * scanned radiochromic film to a calibration curve, and from measurement
 * films to the profiles and the measurement set that `strayline fit` reads.
 * The work is in the film module (include/strayline/film.h); this file reads
 * the command line and prints the summary.
 */
#include <getopt.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

#include "cli.h"
#include "strayline/film.h"
#include "strayline/util.h"

static const char help[] =
    "usage: strayline film calibrate CALIBRATION.yaml -o CURVE.yaml [-r REPORT.html] [--pdf "
    "REPORT.pdf] [OPTIONS]\n"
    "       strayline film profile FILMS.yaml --curve CURVE.yaml --out DIR [OPTIONS]\n\n"
    "calibrate: measure the pieces of a film calibration set (TIFF scans, 16 bits a\n"
    "channel), fit dose (cGy) against net optical density in the power and the\n"
    "rational form per channel, choose by AICc, and write the curve file with its\n"
    "covariance, provenance and the lowest dose it resolves.\n"
    "  -o, --output FILE          the curve file to write (required)\n"
    "  -r, --report FILE          also write an HTML report with the curves\n"
    "      --pdf FILE             also write the report as a PDF (A4)\n"
    "      --channel NAME         red (default), green, blue or grey\n"
    "      --resolve-fraction F   the lowest resolvable dose is where its standard\n"
    "                             uncertainty is F times the dose (default 1)\n"
    "      --reading-area CM2     the area a reading averages, for that dose (default 0.04)\n\n"
    "profile: turn each measurement film of a film set into a dose map, find its\n"
    "field, extract and merge its profiles, write DIR/profiles/*.csv,\n"
    "DIR/measurements.yaml (for strayline fit), DIR/points/*.csv (each point's\n"
    "uncertainty), DIR/films.yaml (what was found) and DIR/qa/*.html (a page a film).\n"
    "      --curve FILE           the curve file (required)\n"
    "      --out DIR              the output folder (required; made if absent)\n"
    "      --dose-channels HOW    single (default: the curve's channel) or triple: the\n"
    "                             red, green and blue channels with a film thickness\n"
    "                             factor per profile cell (RGB scans, three fitted curves)\n\n"
    "both:\n"
    "      --dpi N                pixel density of scans without resolution tags\n"
    "      --created TEXT         creation time to record (default: now, UTC)\n"
    "  -h, --help                 this help\n";

static int calibrate(int argc, char **argv)
{
    enum { OPT_CHANNEL = 256, OPT_FRACTION, OPT_AREA, OPT_DPI, OPT_CREATED, OPT_PDF };
    static const struct option opts[] = {
        {"output", required_argument, NULL, 'o'},
        {"report", required_argument, NULL, 'r'},
        {"pdf", required_argument, NULL, OPT_PDF},
        {"channel", required_argument, NULL, OPT_CHANNEL},
        {"resolve-fraction", required_argument, NULL, OPT_FRACTION},
        {"reading-area", required_argument, NULL, OPT_AREA},
        {"dpi", required_argument, NULL, OPT_DPI},
        {"created", required_argument, NULL, OPT_CREATED},
        {"help", no_argument, NULL, 'h'},
        {NULL, 0, NULL, 0},
    };
    const char *output = NULL, *report = NULL, *pdf = NULL;
    char now[32];
    time_t t = time(NULL);
    struct tm tm;
    gmtime_r(&t, &tm);
    strftime(now, sizeof now, "%Y-%m-%dT%H:%M:%SZ", &tm);
    sl_film_cal_options o = {0, 0, 0, now, NULL};
    int c;
    optind = 1;
    while ((c = getopt_long(argc, argv, "o:r:h", opts, NULL)) != -1) {
        switch (c) {
        case 'o': output = optarg; break;
        case 'r': report = optarg; break;
        case OPT_PDF: pdf = optarg; break;
        case OPT_CHANNEL:
            if (strcmp(optarg, "red") && strcmp(optarg, "green") && strcmp(optarg, "blue") &&
                strcmp(optarg, "grey"))
                return sl_cli_usage("film calibrate", "--channel is red, green, blue or grey");
            o.channel = optarg;
            break;
        case OPT_FRACTION:
            if (!sl_parse_double(optarg, &o.resolve_fraction) || o.resolve_fraction <= 0 ||
                o.resolve_fraction > 10)
                return sl_cli_usage("film calibrate", "--resolve-fraction needs a number in (0, 10]");
            break;
        case OPT_AREA:
            if (!sl_parse_double(optarg, &o.reading_area_cm2) || o.reading_area_cm2 <= 0 ||
                o.reading_area_cm2 > 100)
                return sl_cli_usage("film calibrate", "--reading-area needs cm2 in (0, 100]");
            break;
        case OPT_DPI:
            if (!sl_parse_double(optarg, &o.dpi) || o.dpi < 10 || o.dpi > 10000)
                return sl_cli_usage("film calibrate", "--dpi needs a number from 10 to 10000");
            break;
        case OPT_CREATED: o.created = optarg; break;
        case 'h': fputs(help, stdout); return SL_EXIT_OK;
        default: return sl_cli_bad_option(argv, opts, "o:r:h");
        }
    }
    if (argc - optind != 1)
        return sl_cli_usage("film calibrate", "needs one calibration set");
    if (!output)
        return sl_cli_usage("film calibrate", "--output CURVE.yaml is required");
    const char *input = argv[optind];
    sl_error err = {0};
    sl_film_curve *curve = NULL;
    sl_outfile out = {0}, rep = {0};
    int rc = SL_EXIT_OK;
    if (sl_film_calibrate(input, &o, &curve, &err) != SL_OK) {
        rc = sl_cli_fail(&err);
        goto done;
    }
    /* The scans are inputs too: never written over. */
    /* inputs: the set, each piece's scan (and its scan before exposure), then the outputs */
    size_t ni = 1 + curve->npieces * (curve->pre_scans ? 2 : 1);
    const char **inputs = calloc(ni + 2, sizeof *inputs);
    if (!inputs) {
        fprintf(stderr, "strayline: out of memory\n");
        rc = SL_EXIT_INTERNAL;
        goto done;
    }
    inputs[0] = input;
    for (size_t i = 0; i < curve->npieces; i++) {
        inputs[i + 1] = curve->pieces[i].path;
        if (curve->pre_scans)
            inputs[curve->npieces + i + 1] = curve->pieces[i].path_before;
    }
    if (sl_outfile_open(&out, output, inputs, ni, &err) != SL_OK ||
        sl_film_curve_write(curve, out.fp, &err) != SL_OK ||
        sl_outfile_commit(&out, &err) != SL_OK) {
        sl_outfile_abort(&out);
        free(inputs);
        rc = sl_cli_fail(&err);
        goto done;
    }
    if (report) {
        inputs[ni] = output;
        if (sl_outfile_open(&rep, report, inputs, ni + 1, &err) != SL_OK ||
            sl_film_curve_report(curve, rep.fp, &err) != SL_OK ||
            sl_outfile_commit(&rep, &err) != SL_OK) {
            sl_outfile_abort(&rep);
            free(inputs);
            rc = sl_cli_fail(&err);
            goto done;
        }
    }
    if (pdf) {
        inputs[ni] = output;
        inputs[ni + 1] = report;
        sl_outfile pf = {0};
        if (sl_outfile_open(&pf, pdf, inputs, ni + (report ? 2 : 1), &err) != SL_OK ||
            sl_film_curve_report_pdf(curve, pf.fp, &err) != SL_OK ||
            sl_outfile_commit(&pf, &err) != SL_OK) {
            sl_outfile_abort(&pf);
            free(inputs);
            rc = sl_cli_fail(&err);
            goto done;
        }
    }
    free(inputs);
    for (int i = 0; i < curve->nchannels; i++) {
        const sl_film_channel *ch = &curve->ch[i];
        if (ch->chosen < 0) {
            printf("%-5s channel: not fitted\n", sl_film_channel_name(ch->channel));
            continue;
        }
        printf("%-5s channel: %s form (AICc %.4g, the other %.4g), calibrated to %g cGy, lowest "
               "resolvable dose %s%.3g cGy%s\n",
               sl_film_channel_name(ch->channel), sl_film_form_name((sl_film_form)ch->chosen),
               ch->forms[ch->chosen].aicc,
               ch->forms[1 - ch->chosen].ok ? ch->forms[1 - ch->chosen].aicc : NAN,
               ch->max_dose_cgy, isfinite(ch->lowest_dose_cgy) ? "" : "(none) ",
               ch->lowest_dose_cgy, ch->channel == curve->channel ? " (used)" : "");
    }
    printf("%s: %zu pieces; curve written to %s%s%s%s%s\n", input, curve->npieces, output,
           report ? ", report to " : "", report ? report : "", pdf ? ", PDF to " : "",
           pdf ? pdf : "");
    sl_cli_warnings(&curve->notes);
    if (fflush(stdout) != 0 || ferror(stdout)) {
        fprintf(stderr, "strayline: output error: cannot write to standard output\n");
        rc = SL_EXIT_INTERNAL;
    }
done:
    sl_film_curve_free(curve);
    return rc;
}

static int profile(int argc, char **argv)
{
    enum { OPT_CURVE = 256, OPT_OUT, OPT_DPI, OPT_CREATED, OPT_CHANNELS };
    static const struct option opts[] = {
        {"curve", required_argument, NULL, OPT_CURVE},
        {"dose-channels", required_argument, NULL, OPT_CHANNELS},
        {"out", required_argument, NULL, OPT_OUT},
        {"dpi", required_argument, NULL, OPT_DPI},
        {"created", required_argument, NULL, OPT_CREATED},
        {"help", no_argument, NULL, 'h'},
        {NULL, 0, NULL, 0},
    };
    char now[32];
    time_t t = time(NULL);
    struct tm tm;
    gmtime_r(&t, &tm);
    strftime(now, sizeof now, "%Y-%m-%dT%H:%M:%SZ", &tm);
    sl_film_profile_options o = {NULL, NULL, 0, now, SL_FILM_DOSE_SINGLE};
    int c;
    optind = 1;
    while ((c = getopt_long(argc, argv, "h", opts, NULL)) != -1) {
        switch (c) {
        case OPT_CURVE: o.curve_path = optarg; break;
        case OPT_OUT: o.out_dir = optarg; break;
        case OPT_DPI:
            if (!sl_parse_double(optarg, &o.dpi) || o.dpi < 10 || o.dpi > 10000)
                return sl_cli_usage("film profile", "--dpi needs a number from 10 to 10000");
            break;
        case OPT_CREATED: o.created = optarg; break;
        case OPT_CHANNELS:
            if (strcmp(optarg, "single") == 0)
                o.dose_channels = SL_FILM_DOSE_SINGLE;
            else if (strcmp(optarg, "triple") == 0)
                o.dose_channels = SL_FILM_DOSE_TRIPLE;
            else
                return sl_cli_usage("film profile",
                                    "--dose-channels is single or triple, not '%s'", optarg);
            break;
        case 'h': fputs(help, stdout); return SL_EXIT_OK;
        default: return sl_cli_bad_option(argv, opts, "h");
        }
    }
    if (argc - optind != 1)
        return sl_cli_usage("film profile", "needs one film set");
    if (!o.curve_path)
        return sl_cli_usage("film profile", "--curve CURVE.yaml is required");
    if (!o.out_dir)
        return sl_cli_usage("film profile", "--out DIR is required");
    sl_error err = {0};
    sl_film_run_summary sum = {0};
    int rc = SL_EXIT_OK;
    if (sl_film_profiles(argv[optind], &o, &sum, &err) != SL_OK) {
        rc = sl_cli_fail(&err);
    } else {
        printf("%s: %zu films, %zu profiles; %zu points below the lowest resolvable dose and "
               "%zu above the calibrated range dropped; measurement set written to %s\n",
               argv[optind], sum.nfilms, sum.nprofiles, sum.dropped_low, sum.dropped_high,
               sum.measurement_set);
        if (o.dose_channels == SL_FILM_DOSE_TRIPLE)
            printf("triple-channel dose: %zu points dropped with the film thickness factor on its "
                   "range's bound (%g to %g)\n",
                   sum.dropped_tau, SL_FILM_TAU_LO, SL_FILM_TAU_HI);
        sl_cli_warnings(&sum.notes);
        if (fflush(stdout) != 0 || ferror(stdout)) {
            fprintf(stderr, "strayline: output error: cannot write to standard output\n");
            rc = SL_EXIT_INTERNAL;
        }
    }
    sl_film_run_summary_free(&sum);
    return rc;
}

int sl_cmd_film(int argc, char **argv)
{
    if (argc < 2)
        return sl_cli_usage("film", "needs calibrate or profile");
    if (strcmp(argv[1], "-h") == 0 || strcmp(argv[1], "--help") == 0) {
        fputs(help, stdout);
        return SL_EXIT_OK;
    }
    if (strcmp(argv[1], "calibrate") == 0 || strcmp(argv[1], "profile") == 0) {
        /* the font caches are released by main() after every command */
        return argv[1][0] == 'c' ? calibrate(argc - 1, argv + 1) : profile(argc - 1, argv + 1);
    }
    return sl_cli_usage("film", "'%s' is not calibrate or profile", argv[1]);
}
