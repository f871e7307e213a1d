/*
 * `strayline fit MEASUREMENTS.yaml -o MODEL.yaml`: commission a machine's
 * peripheral-dose models from its measured profiles, write the model file
 * and, if asked, an HTML fit report. Poor fits are listed at the end.
 */
#include <getopt.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>
#include <unistd.h>

#include "cli.h"
#include "strayline/commission.h"
#include "strayline/measure.h"
#include "strayline/model.h"
#include "strayline/util.h"

static const char help[] =
    "usage: strayline fit MEASUREMENTS.yaml -o MODEL.yaml [OPTIONS]\n\n"
    "Fit every out-of-field profile of a measurement set (dose in percent of\n"
    "the central-axis maximum against distance from the field edge, cm) with\n"
    "the smooth or the peaked form, chosen by AICc, and write the model file.\n\n"
    "  -o, --output FILE          the model file to write (required; '-': standard\n"
    "                             output, and the summary goes to standard error)\n"
    "  -r, --report FILE          also write an HTML fit report with a figure a profile\n"
    "                             ('-': standard output)\n"
    "      --report-pdf FILE      also write the fit report as a PDF, an energy and\n"
    "                             applicator a page ('-': standard output)\n"
    "      --paper a4|letter      that PDF's paper (default a4)\n"
    "      --model-version TEXT   version label of the model (default: the date)\n"
    "      --created TEXT         creation time to record (default: now, UTC)\n"
    "  -j, --threads N            threads to use (default: every core)\n"
    "  -q, --quiet                no progress on the terminal\n"
    "  -h, --help                 this help\n";

static void progress(size_t done, size_t total, const char *what, void *ctx)
{
    (void)ctx;
    fprintf(stderr, "\rstrayline fit: %zu/%zu %-48.48s", done, total, what);
    if (done == total)
        fputc('\n', stderr);
    fflush(stderr);
}

/* Write the model, read back first as `estimate` will read it: a model
 * that the loader refuses (a parameter beyond its bounds) is an error now,
 * at commissioning, not when a patient is screened. */
static sl_status write_checked(const sl_model *model, const char *output, sl_outfile *out,
                               const char **inputs, size_t ninputs, sl_error *err)
{
    char *buf = NULL;
    size_t len = 0;
    FILE *mem = open_memstream(&buf, &len);
    if (!mem)
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    sl_status st = sl_model_write(model, mem, err);
    if (fclose(mem) != 0 && st == SL_OK)
        st = sl_error_set(err, SL_ENOMEM, "out of memory");
    sl_model *back = NULL;
    if (st == SL_OK) {
        st = sl_model_load_buffer(buf, len, output, &back, err);
        if (st != SL_OK)
            sl_error_prefix(err, "the model as written would be refused when read");
    }
    sl_model_free(back);
    if (st == SL_OK)
        st = sl_cli_output_open(out, output, inputs, ninputs, err);
    if (st == SL_OK && fwrite(buf, 1, len, out->fp) != len)
        st = sl_error_set(err, SL_EIO, "%s: cannot write the model", output);
    if (st == SL_OK)
        st = sl_cli_output_commit(out, err);
    free(buf);
    return st;
}

int sl_cmd_fit(int argc, char **argv)
{
    enum { OPT_VERSION = 256, OPT_CREATED, OPT_REPORT_PDF, OPT_PAPER };
    static const struct option opts[] = {
        {"output", required_argument, NULL, 'o'},
        {"report", required_argument, NULL, 'r'},
        {"report-pdf", required_argument, NULL, OPT_REPORT_PDF},
        {"paper", required_argument, NULL, OPT_PAPER},
        {"model-version", required_argument, NULL, OPT_VERSION},
        {"created", required_argument, NULL, OPT_CREATED},
        {"threads", required_argument, NULL, 'j'},
        {"quiet", no_argument, NULL, 'q'},
        {"help", no_argument, NULL, 'h'},
        {NULL, 0, NULL, 0},
    };
    const char *output = NULL, *report = NULL, *version = NULL, *created = NULL,
               *report_pdf = NULL, *paper = "a4";
    int threads = 0;
    bool quiet = false;
    static const char shortopts[] = "o:r:j:qh";
    int c;
    optind = 1;
    while ((c = getopt_long(argc, argv, shortopts, opts, NULL)) != -1) {
        switch (c) {
        case 'o': output = optarg; break;
        case 'r': report = optarg; break;
        case OPT_REPORT_PDF: report_pdf = optarg; break;
        case OPT_PAPER:
            if (strcmp(optarg, "a4") != 0 && strcmp(optarg, "letter") != 0)
                return sl_cli_usage("fit", "--paper needs a4 or letter, not '%s'", optarg);
            paper = optarg;
            break;
        case OPT_VERSION: version = optarg; break;
        case OPT_CREATED: created = optarg; break;
        case 'j':
            if (!sl_parse_int(optarg, &threads) || threads < 1 || threads > 64)
                return sl_cli_usage("fit", "--threads needs a number from 1 to 64");
            break;
        case 'q': quiet = true; break;
        case 'h': fputs(help, stdout); return SL_EXIT_OK;
        default: return sl_cli_bad_option(argv, opts, shortopts);
        }
    }
    if (argc - optind != 1)
        return sl_cli_usage("fit", "needs one measurement set");
    if (!output)
        return sl_cli_usage("fit", "--output MODEL.yaml is required");
    const char *input = argv[optind];
    if (sl_cli_is_stdio(input))
        return sl_cli_usage("fit", "the measurement set cannot be read from standard input: it "
                                   "names its profile CSV files relative to its own folder, so "
                                   "give its file name");
    if (sl_cli_is_stdio(output) + sl_cli_is_stdio(report) + sl_cli_is_stdio(report_pdf) > 1)
        return sl_cli_usage("fit", "only one of --output, --report and --report-pdf can go to "
                                   "standard output");
    /* the summary must not mix with a file written to standard output */
    FILE *summary = sl_cli_is_stdio(output) || sl_cli_is_stdio(report) ||
                            sl_cli_is_stdio(report_pdf)
                        ? stderr
                        : stdout;
    char now[32], today[16];
    time_t t = time(NULL);
    struct tm tm;
    gmtime_r(&t, &tm);
    strftime(now, sizeof now, "%Y-%m-%dT%H:%M:%SZ", &tm);
    strftime(today, sizeof today, "%Y-%m-%d", &tm);

    sl_error err = {0};
    sl_measurement_set *ms = NULL;
    const char **inputs = NULL;
    sl_model *model = NULL;
    sl_outfile out = {0}, rep = {0};
    int rc = SL_EXIT_OK;
    if (sl_measurements_load(input, &ms, &err) != SL_OK) {
        rc = sl_cli_fail(&err);
        goto done;
    }
    sl_commission_options copt = {version ? version : today, created ? created : now,
                                  ms->machine.invented
                                      ? "INVENTED DEMO DATA - NOT A REAL MACHINE - NOT FOR "
                                        "CLINICAL USE"
                                      : NULL,
                                  threads, quiet || !isatty(STDERR_FILENO) ? NULL : progress,
                                  NULL};
    /* every file read: the measurement set and each profile CSV, then the model */
    inputs = calloc(ms->nprofiles + 2, sizeof *inputs);
    if (!inputs) {
        sl_cli_error("out of memory");
        rc = SL_EXIT_INTERNAL;
        goto done;
    }
    inputs[0] = input;
    for (size_t i = 0; i < ms->nprofiles; i++)
        inputs[i + 1] = ms->profiles[i].path;
    if (sl_commission(ms, &copt, &model, &err) != SL_OK ||
        write_checked(model, output, &out, inputs, ms->nprofiles + 1, &err) != SL_OK) {
        sl_cli_output_abort(&out);
        rc = sl_cli_fail(&err);
        goto done;
    }
    if (report) {
        inputs[ms->nprofiles + 1] = output;
        if (sl_cli_output_open(&rep, report, inputs, ms->nprofiles + 2, &err) != SL_OK ||
            sl_report_fit_html(rep.fp, ms, model, &err) != SL_OK ||
            sl_cli_output_commit(&rep, &err) != SL_OK) {
            sl_cli_output_abort(&rep);
            rc = sl_cli_fail(&err);
            goto done;
        }
    }
    if (report_pdf) {
        inputs[ms->nprofiles + 1] = output;
        unsigned char *pdf = NULL;
        size_t npdf = 0;
        sl_outfile rp = {0};
        if (sl_report_fit_pdf(ms, model, paper, &pdf, &npdf, &err) != SL_OK ||
            sl_cli_output_open(&rp, report_pdf, inputs, ms->nprofiles + 2, &err) != SL_OK ||
            (fwrite(pdf, 1, npdf, rp.fp) != npdf &&
             sl_error_set(&err, SL_EIO, "%s: cannot write the PDF", report_pdf) != SL_OK) ||
            sl_cli_output_commit(&rp, &err) != SL_OK) {
            sl_cli_output_abort(&rp);
            free(pdf);
            rc = sl_cli_fail(&err);
            goto done;
        }
        free(pdf);
    }
    size_t poor = 0, peaked = 0;
    for (size_t i = 0; i < model->nprofiles; i++) {
        poor += model->profiles[i].fit.poor;
        peaked += model->profiles[i].fit.form == SL_FORM_PEAKED;
    }
    fprintf(summary,
            "%s: %zu profiles fitted (%zu with the peaked form, %zu smooth); model written to "
            "%s%s%s\n",
            input, model->nprofiles, peaked, model->nprofiles - peaked,
            sl_cli_is_stdio(output) ? "standard output" : output, report ? ", report to " : "",
            !report ? "" : sl_cli_is_stdio(report) ? "standard output" : report);
    sl_cli_warnings(&ms->notes);
    if (poor) {
        fprintf(summary,
                "poor fits (chi-square or largest residual beyond what a good profile passes "
                "with %.1f %% and %.1f %% false alarms):\n",
                100 * SL_POOR_ALPHA_CHI2, 100 * SL_POOR_ALPHA_RESIDUAL);
        for (size_t i = 0; i < model->nprofiles; i++) {
            const sl_model_profile *p = &model->profiles[i];
            if (!p->fit.poor)
                continue;
            char label[160];
            sl_profile_label(p->energy_mev, p->applicator, p->insert, p->depth_cm, p->direction,
                             label, sizeof label);
            sl_profile_label_geometry(p->tilt_deg, p->ssd_cm, model->machine.nominal_ssd_cm,
                                      label, sizeof label);
            fprintf(summary,
                    "  %-40s reduced chi-square %.2f, largest residual %.1f sigma (%s)\n", label,
                    p->fit.chi2_red, p->fit.max_residual_sigma, p->data_file);
        }
    }
    if (fflush(stdout) != 0 || ferror(stdout)) {
        sl_cli_error("output error: cannot write to standard output");
        rc = SL_EXIT_INTERNAL;
    }
done:
    free(inputs);
    sl_model_free(model);
    sl_measurements_free(ms);
    return rc;
}
