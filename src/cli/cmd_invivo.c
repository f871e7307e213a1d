/*
 * `strayline invivo add|report|propose`: in-vivo readings into the
 * screening log, the log's readings against their estimates, and a new
 * model version whose transfer uncertainty comes from them.
 *
 * add estimates every reading before it writes any, so a file with one bad
 * reading adds nothing (fix it and run again; a reading already in the log
 * is refused, never counted twice). propose never touches the model it
 * reads: it writes a new file with a new version label.
 */
#include <getopt.h>
#include <libgen.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

#include "cli.h"
#include "strayline/invivo.h"
#include "strayline/levels.h"
#include "strayline/model.h"
#include "strayline/util.h"
#include "strayline/version.h"

static const char help[] =
    "usage: strayline invivo add READINGS.yaml --model MODEL.yaml [--log FILE]\n"
    "       strayline invivo report [--log FILE] [--model MODEL.yaml] [--format text|json]\n"
    "                               [-o FILE] [--html FILE] [--pdf FILE] [--paper a4|letter]\n"
    "       strayline invivo propose --model MODEL.yaml -o NEW.yaml [--log FILE]\n"
    "                               [--version-label LABEL] [--scale]\n\n"
    "add: for each reading of READINGS.yaml (format in README.md), estimate the dose at\n"
    "the dosimeter's position for the fractions it measured, as `estimate` does, and\n"
    "record reading, estimate, uncertainties and the ratio in the screening log. A\n"
    "reading more than k = 2 combined standard uncertainties from its estimate is\n"
    "flagged at once with what to check (exit code 4).\n"
    "report: per machine, energy, applicator and distance band the number of readings,\n"
    "the mean log ratio (measured/estimated) with its 95 % CI, the spread with its\n"
    "interval, a t test of the bias, a chi-square test of the spread against the\n"
    "stated uncertainties, and the outliers.\n"
    "propose: a new model file whose transfer uncertainty bands come from the\n"
    "readings of its machine, the evidence in the bands' source; MODEL.yaml is not\n"
    "changed. With --scale also a dose scale factor per energy and applicator\n"
    "(exp of the mean log ratio), only where at least 5 readings show a bias\n"
    "significant by the t test at 5 %; a factor below 1 lowers the estimate but\n"
    "never the upper bound below the unscaled estimate.\n\n"
    "  -m, --model MODEL.yaml  the model (add: estimates with it; report: its bands)\n"
    "  -l, --levels FILE       action levels (default: action-levels.yaml beside the model)\n"
    "  -L, --log FILE          the screening log (default: screening.sqlite here)\n"
    "  -f, --format FMT        report: text (default) or json\n"
    "      --html FILE         report: also as HTML with its plot (measured/estimated\n"
    "                          against distance); --pdf FILE as PDF (--paper a4|letter)\n"
    "  -o, --output FILE       report: write to FILE (default: standard output, unless\n"
    "                          only --html or --pdf is given);\n"
    "                          propose: the new model file (required)\n"
    "      --version-label L   propose: the new model_version (default: the old one\n"
    "                          with '+invivo-' and the date of the last reading)\n"
    "      --scale             propose: also the in-vivo scale factors (above)\n"
    "  -h, --help              this help\n";

enum { OPT_VERSION = 256, OPT_HTML, OPT_PDF, OPT_PAPER, OPT_SCALE };

static void print_result(const sl_invivo_result *r)
{
    const sl_reading *rd = r->reading;
    char corr[32] = "none";
    if (!isnan(rd->energy_correction))
        snprintf(corr, sizeof corr, "%.4g", rd->energy_correction);
    printf("%s: %s, %s %s MeV %s, %.1f cm from the field edge: measured %.4g cGy (reading %.4g "
           "cGy x energy correction %s), estimate %.4g cGy (u %.2g cGy) over %d fraction%s, "
           "measured/estimated %.3f, %.1f standard uncertainties from 1%s\n",
           rd->id, rd->patient_id, r->machine, r->energy, r->applicator, r->distance_cm,
           r->measured_cgy, rd->reading_cgy,
           corr, r->estimate_cgy, r->u_estimate_cgy,
           rd->fractions, rd->fractions == 1 ? "" : "s", exp(r->log_ratio),
           fabs(r->log_ratio) / r->u_log_ratio, r->flagged ? ": FLAGGED" : "");
}

static int cmd_add(int argc, char **argv, const char *readings_path, const char *model_path,
                   const char *levels_path, const char *log_path)
{
    (void)argc;
    (void)argv;
    char default_levels[4096];
    if (!levels_path) {
        char copy[4096];
        snprintf(copy, sizeof copy, "%s", model_path);
        snprintf(default_levels, sizeof default_levels, "%s/action-levels.yaml", dirname(copy));
        levels_path = default_levels;
    }
    sl_error err = {0};
    sl_readings *rs = NULL;
    sl_model *model = NULL;
    sl_levels *levels = NULL;
    sl_screenlog *log = NULL;
    sl_invivo_result *res = NULL;
    long long *screening = NULL;
    size_t nres = 0;
    int rc = SL_EXIT_OK;
    if (sl_readings_load(readings_path, &rs, &err) != SL_OK ||
        sl_cli_read_model(model_path, &model, &err) != SL_OK ||
        sl_levels_load(levels_path, &levels, &err) != SL_OK ||
        sl_screenlog_open(log_path, true, &log, &err) != SL_OK) {
        rc = sl_cli_fail(&err);
        goto done;
    }
    res = calloc(rs->n, sizeof *res);
    screening = calloc(rs->n, sizeof *screening);
    if (!res || !screening) {
        sl_error_set(&err, SL_ENOMEM, "out of memory");
        rc = sl_cli_fail(&err);
        goto done;
    }
    for (size_t i = 0; i < rs->n; i++) {
        const sl_reading *rd = &rs->r[i];
        if (!rd->plan_path) {
            /* only a plan UID: the log must know the plan, and still the
             * files are needed to estimate at the dosimeter */
            long long id = 0;
            char *when = NULL;
            if (sl_screenlog_plan_screening(log, rd->plan_uid, &id, &when, &err) != SL_OK) {
                rc = sl_cli_fail(&err);
                goto done;
            }
            if (id)
                sl_cli_error("%s: line %d: reading '%s': the log %s knows plan UID %s (screened "
                             "%s) but not where its files are: give plan and structure_set",
                             readings_path, rd->line, rd->id, log_path, rd->plan_uid, when);
            else
                sl_cli_error("%s: line %d: reading '%s': plan UID %s: the log %s has no "
                             "screening of this plan and the reading names no plan and "
                             "structure_set files: give them",
                             readings_path, rd->line, rd->id, rd->plan_uid, log_path);
            free(when);
            rc = SL_EXIT_INPUT;
            goto done;
        }
        sl_status st = sl_invivo_estimate(rd, model, levels, levels_path, &res[i], &err);
        if (st != SL_OK) {
            /* name the readings file and the reading's line as well as
             * the DICOM file and element the estimate found wrong */
            sl_cli_error("%s: line %d: %s", readings_path, rd->line, err.msg);
            rc = st == SL_EUSAGE ? SL_EXIT_INPUT : sl_cli_exit_code(st);
            goto done;
        }
        nres = i + 1;
        char *added = NULL;
        if (sl_screenlog_reading_exists(log, res[i].patient_id, res[i].plan_uid, rd->id, &added,
                                        &err) != SL_OK) {
            rc = sl_cli_fail(&err);
            goto done;
        }
        if (added) {
            sl_cli_error("%s: line %d: reading '%s' of patient %s, plan %s is in the log %s "
                         "already (added %s): nothing added",
                         readings_path, rd->line, rd->id, res[i].patient_id, res[i].plan_uid,
                         log_path, added);
            free(added);
            rc = SL_EXIT_INPUT;
            goto done;
        }
        char *when = NULL;
        if (sl_screenlog_plan_screening(log, res[i].plan_uid, &screening[i], &when, &err) !=
            SL_OK) {
            rc = sl_cli_fail(&err);
            goto done;
        }
        free(when);
        if (!screening[i])
            sl_notes_add(&res[i].notes,
                         "reading '%s': the log %s has no screening of plan %s: the reading is "
                         "recorded without a link to one",
                         rd->id, log_path, res[i].plan_uid);
    }
    if (rs->notice)
        printf("%s\n", rs->notice);
    size_t nflag = 0;
    for (size_t i = 0; i < nres; i++) {
        if (sl_screenlog_add_reading(log, &res[i], readings_path, model, screening[i], NULL,
                                     &err) != SL_OK) {
            sl_cli_error("%zu of %zu readings were added before this failure", i, nres);
            rc = sl_cli_fail(&err);
            goto done;
        }
        print_result(&res[i]);
        sl_cli_warnings(&res[i].notes);
        if (res[i].flagged) {
            nflag++;
            sl_cli_error("reading '%s' FLAGGED: %s", res[i].reading->id, res[i].check);
        }
    }
    printf("%zu reading%s added to %s, %zu flagged (more than k = 2 from the screening "
           "estimate)\n",
           nres, nres == 1 ? "" : "s", log_path, nflag);
    if (fflush(stdout) != 0) {
        sl_cli_error("output error: cannot write to standard output");
        rc = SL_EXIT_INTERNAL;
        goto done;
    }
    rc = nflag ? SL_EXIT_FLAGGED : SL_EXIT_OK;
done:
    for (size_t i = 0; i < nres; i++)
        sl_invivo_result_free(&res[i]);
    free(res);
    free(screening);
    sl_screenlog_close(log);
    sl_levels_free(levels);
    sl_model_free(model);
    sl_readings_free(rs);
    return rc;
}

typedef struct report_outputs {
    const char *output, *html, *pdf, *paper;
} report_outputs;

/* The readings compared with this very model (its SHA-256): a ratio
 * measured/estimated says nothing of another version's estimate (found by
 * an independent review: readings against a model whose output was twice
 * this one's halved this one with a scale of 0.5). The others are named
 * and left out; none left is an error. */
static bool this_model_only(sl_log_readings *rs, const sl_model *model, const char *log_path,
                            sl_error *err)
{
    size_t had = rs->n;
    char *versions = NULL;
    size_t dropped = sl_log_readings_keep_model(rs, model->sha256, &versions);
    if (dropped)
        fprintf(stderr,
                "strayline invivo: warning: %zu of the %zu readings of machine %s in %s were "
                "compared with another version of the model (%s), not with this one (%s, "
                "SHA-256 %.16s...): left out; add them again (invivo add) against this model "
                "to count them\n",
                dropped, had, model->machine.name, log_path, versions ? versions : "?",
                model->model_version, model->sha256);
    free(versions);
    if (dropped && rs->n == 0) {
        sl_error_set(err, SL_EINPUT, "%s: no reading of machine %s was compared with this model "
                                     "(version %s): nothing to propose from",
                     log_path, model->machine.name, model->model_version);
        return false;
    }
    return true;
}

static int cmd_report(const char *model_path, const char *log_path, sl_format fmt,
                      const report_outputs *o)
{
    const char *output = o->output;
    sl_error err = {0};
    sl_model *model = NULL;
    sl_screenlog *log = NULL;
    sl_log_readings *rs = NULL;
    sl_invivo_stats *stats = NULL;
    sl_transfer defaults = {0};
    sl_outfile out = {0};
    int rc = SL_EXIT_OK;
    const char *inputs[] = {log_path, model_path};
    if ((model_path && sl_cli_read_model(model_path, &model, &err) != SL_OK) ||
        (!model && sl_transfer_default(&defaults, &err) != SL_OK) ||
        sl_screenlog_open(log_path, false, &log, &err) != SL_OK ||
        sl_screenlog_readings(log, model ? model->machine.name : NULL, &rs, &err) != SL_OK ||
        (model && !this_model_only(rs, model, log_path, &err)) ||
        sl_invivo_statistics(rs, model ? &model->machine.transfer : &defaults, &stats, &err) !=
            SL_OK) {
        rc = sl_cli_fail(&err);
        goto done;
    }
    sl_invivo_report rep = {log_path, rs, stats, model};
    size_t ninputs = model_path ? 2 : 1;
    if (o->html && (sl_cli_output_open(&out, o->html, inputs, ninputs, &err) != SL_OK ||
                    sl_report_invivo_html(out.fp, &rep, &err) != SL_OK ||
                    sl_cli_output_commit(&out, &err) != SL_OK)) {
        sl_cli_output_abort(&out);
        rc = sl_cli_fail(&err);
        goto done;
    }
    memset(&out, 0, sizeof out);
    if (o->pdf) {
        unsigned char *pdf = NULL;
        size_t npdf = 0;
        sl_status st = sl_report_invivo_pdf(&rep, o->paper, &pdf, &npdf, &err);
        if (st == SL_OK && (st = sl_cli_output_open(&out, o->pdf, inputs, ninputs, &err)) == SL_OK) {
            if (fwrite(pdf, 1, npdf, out.fp) != npdf)
                st = sl_error_set(&err, SL_EIO, "%s: cannot write", o->pdf);
            st = st == SL_OK ? sl_cli_output_commit(&out, &err) : st;
        }
        free(pdf);
        if (st != SL_OK) {
            sl_cli_output_abort(&out);
            rc = sl_cli_fail(&err);
            goto done;
        }
        memset(&out, 0, sizeof out);
    }
    if ((o->html || o->pdf) && !output)
        goto done;
    if (sl_cli_output_open(&out, output ? output : "-", inputs, ninputs, &err) !=
            SL_OK ||
        sl_report_invivo(out.fp, fmt, &rep, &err) != SL_OK ||
        sl_cli_output_commit(&out, &err) != SL_OK) {
        sl_cli_output_abort(&out);
        rc = sl_cli_fail(&err);
    }
done:
    free(defaults.bands);
    free(defaults.source);
    free(defaults.mark);
    sl_invivo_stats_free(stats);
    sl_log_readings_free(rs);
    sl_screenlog_close(log);
    sl_model_free(model);
    return rc;
}

/* propose --scale: the groups with a significant bias get a scale (with
 * its evidence, into the new model), the others are named with the reason */
static sl_status add_scales(sl_model *model, const sl_invivo_scales *sc, const char *model_path,
                            const char *log_path, size_t *taken, sl_error *err)
{
    *taken = 0;
    size_t want = model->nscales;
    for (size_t i = 0; i < sc->n; i++)
        want += sc->c[i].take;
    if (want == model->nscales) {
        for (size_t i = 0; i < sc->n; i++)
            fprintf(stderr, "strayline invivo: %s MeV, applicator %s: no scale: %s\n",
                    sc->c[i].energy, sc->c[i].applicator, sc->c[i].why);
        return SL_OK;
    }
    sl_model_scale *ns = realloc(model->scales, want * sizeof *ns);
    if (!ns)
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    model->scales = ns;
    for (size_t i = 0; i < sc->n; i++) {
        const sl_invivo_scale_choice *c = &sc->c[i];
        if (!c->take) {
            fprintf(stderr, "strayline invivo: %s MeV, applicator %s: no scale: %s\n", c->energy,
                    c->applicator, c->why);
            continue;
        }
        sl_model_scale *s = &model->scales[model->nscales];
        memset(s, 0, sizeof *s);
        s->energy_mev = c->energy_mev;
        s->factor = exp(c->mean_log_ratio);
        s->readings = (int)c->n;
        s->mean_log_ratio = c->mean_log_ratio;
        s->ci_lo = c->ci_lo;
        s->ci_hi = c->ci_hi;
        s->p_value = c->p_bias;
        s->applicator = strdup(c->applicator);
        s->first_date = strdup(c->first_date);
        s->last_date = strdup(c->last_date);
        sl_buf b = {0};
        sl_buf_printf(&b, "in-vivo readings of the screening log %s compared with model %s "
                          "(version %s): factor exp(mean log ratio measured/estimated) over "
                          "every distance; bias significant by the two-sided t test at %g; "
                          "proposed by strayline invivo propose --scale %s",
                      log_path, model_path, model->model_version, SL_INVIVO_SCALE_P,
                      sl_version());
        s->source = b.data && !b.failed ? strdup(b.data) : NULL;
        sl_buf_free(&b);
        model->nscales++;
        if (!s->applicator || !s->first_date || !s->last_date || !s->source)
            return sl_error_set(err, SL_ENOMEM, "out of memory");
        (*taken)++;
        fprintf(stderr, "strayline invivo: %s MeV, applicator %s: scale %.4f from %zu readings "
                        "(mean log ratio %.4f, 95 %% interval %.4f to %.4f, p = %.3g)%s\n",
                c->energy, c->applicator, s->factor, c->n, c->mean_log_ratio, c->ci_lo, c->ci_hi,
                c->p_bias,
                s->factor < 1 ? ": below 1 it lowers the estimate only; the upper bound stays "
                                "at least the unscaled estimate"
                              : "");
    }
    return SL_OK;
}

static int cmd_propose(const char *model_path, const char *log_path, const char *output,
                       const char *label, bool scale)
{
    sl_error err = {0};
    sl_model *model = NULL;
    sl_screenlog *log = NULL;
    sl_log_readings *rs = NULL;
    sl_invivo_proposal *p = NULL;
    sl_invivo_scales *sc = NULL;
    size_t taken = 0;
    sl_outfile out = {0};
    int rc = SL_EXIT_OK;
    char *source = NULL;
    const char *inputs[] = {model_path, log_path};
    if (sl_cli_read_model(model_path, &model, &err) != SL_OK ||
        sl_screenlog_open(log_path, false, &log, &err) != SL_OK ||
        sl_screenlog_readings(log, model->machine.name, &rs, &err) != SL_OK ||
        !this_model_only(rs, model, log_path, &err) ||
        sl_invivo_propose(model, rs, &p, &err) != SL_OK ||
        (scale && sl_invivo_propose_scales(model, rs, &sc, &err) != SL_OK)) {
        rc = sl_cli_fail(&err);
        goto done;
    }
    char newlabel[512];
    if (label)
        snprintf(newlabel, sizeof newlabel, "%s", label);
    else
        snprintf(newlabel, sizeof newlabel, "%s+invivo-%s", model->model_version, p->last_date);
    if (strcmp(newlabel, model->model_version) == 0) {
        rc = sl_cli_usage("invivo", "--version-label '%s' is the model's own: a new model needs "
                                    "a new label",
                          newlabel);
        goto done;
    }
    size_t changed = 0;
    for (size_t b = 0; b < p->nbands; b++) {
        changed += p->n[b] >= SL_INVIVO_MIN_BAND;
        if (p->n[b] >= SL_INVIVO_MIN_BAND && p->floored[b])
            fprintf(stderr,
                    "strayline invivo: warning: transfer band %zu: the readings' own stated "
                    "uncertainty covers their spread, which would leave %.3f; it is set to %g, "
                    "the least a proposal sets (check the readings' stated uncertainties)\n",
                    b + 1, p->upper[b] > p->u_other[b]
                               ? sqrt(p->upper[b] * p->upper[b] - p->u_other[b] * p->u_other[b])
                               : 0.0,
                    SL_INVIVO_BAND_FLOOR);
    }
    /* the evidence, in the bands' source, so that model show and every
     * estimate report repeat where the transfer uncertainty came from */
    size_t cap = 4096 + 256 * p->nbands + strlen(log_path) + strlen(model_path) +
                 strlen(model->model_version) + strlen(model->machine.transfer.source);
    source = malloc(cap);
    if (!source) {
        sl_error_set(&err, SL_ENOMEM, "out of memory");
        rc = sl_cli_fail(&err);
        goto done;
    }
    int k = snprintf(source, cap,
                     "in-vivo readings of the screening log %s: %zu readings of machine %s "
                     "measured %s to %s, compared with model %s (version %s); per band the 95 "
                     "%% upper bound (chi-square, n degrees of freedom) of the RMS log ratio "
                     "(measured/estimated) about 0, less the readings' own uncertainties in "
                     "quadrature (the model's other components left in: errs high); bands with "
                     "fewer than %d readings keep the previous value (%s). Proposed by "
                     "strayline invivo propose %s",
                     log_path, p->nreadings, model->machine.name, p->first_date, p->last_date,
                     model_path, model->model_version, SL_INVIVO_MIN_BAND,
                     model->machine.transfer.source, sl_version());
    for (size_t b = 0; b < p->nbands && k > 0 && (size_t)k < cap; b++) {
        double lo = b ? model->machine.transfer.bands[b - 1].below_cm : 0;
        double hi = model->machine.transfer.bands[b].below_cm;
        char range[64];
        if (isinf(hi) || b + 1 == p->nbands)
            snprintf(range, sizeof range, "%g cm and beyond", lo);
        else
            snprintf(range, sizeof range, "%g to %g cm", lo, hi);
        if (p->n[b] >= SL_INVIVO_MIN_BAND)
            k += snprintf(source + k, cap - (size_t)k,
                          "; %s: n = %zu, RMS log ratio %.3f, upper bound %.3f, readings' "
                          "own %.3f, relative %.3f%s (was %.3f)",
                          range, p->n[b], p->rms[b], p->upper[b], p->u_other[b], p->new_rel[b],
                          p->floored[b] ? ", raised to the least a proposal sets" : "",
                          p->old_rel[b]);
        else
            k += snprintf(source + k, cap - (size_t)k, "; %s: n = %zu, kept %.3f", range,
                          p->n[b], p->old_rel[b]);
    }
    if (sc && add_scales(model, sc, model_path, log_path, &taken, &err) != SL_OK) {
        rc = sl_cli_fail(&err);
        goto done;
    }
    if (changed == 0 && taken == 0) {
        sl_cli_error("the log %s has fewer than %d readings of machine %s in every distance "
                     "band%s: no band would change, no model written",
                     log_path, SL_INVIVO_MIN_BAND, model->machine.name,
                     scale ? " and no group has a significant bias" : "");
        rc = SL_EXIT_INPUT;
        goto done;
    }
    for (size_t b = 0; changed && b < p->nbands; b++)
        model->machine.transfer.bands[b].relative = p->new_rel[b];
    if (changed) {
        free(model->machine.transfer.source);
        model->machine.transfer.source = source;
        source = NULL;
        free(model->machine.transfer.mark);
        model->machine.transfer.mark = strdup("measured");
        model->machine.transfer.is_default = false;
    }
    free(model->model_version);
    model->model_version = strdup(newlabel);
    if (!model->machine.transfer.mark || !model->model_version) {
        sl_error_set(&err, SL_ENOMEM, "out of memory");
        rc = sl_cli_fail(&err);
        goto done;
    }
    if (sl_cli_output_open(&out, output, inputs, 2, &err) != SL_OK ||
        sl_model_write(model, out.fp, &err) != SL_OK ||
        sl_cli_output_commit(&out, &err) != SL_OK) {
        sl_cli_output_abort(&out);
        rc = sl_cli_fail(&err);
        goto done;
    }
    char scales[64] = "";
    if (scale)
        snprintf(scales, sizeof scales, ", %zu in-vivo scale%s", taken, taken == 1 ? "" : "s");
    fprintf(stderr, "strayline invivo: wrote %s, model_version %s: transfer uncertainty from %zu "
                    "readings (%zu of %zu bands changed)%s; %s is unchanged\n",
            output, newlabel, p->nreadings, changed, p->nbands, scales, model_path);
done:
    free(source);
    sl_invivo_scales_free(sc);
    sl_invivo_proposal_free(p);
    sl_log_readings_free(rs);
    sl_screenlog_close(log);
    sl_model_free(model);
    return rc;
}

int sl_cmd_invivo(int argc, char **argv)
{
    if (argc >= 2 && (strcmp(argv[1], "--help") == 0 || strcmp(argv[1], "-h") == 0)) {
        fputs(help, stdout);
        return SL_EXIT_OK;
    }
    static const char *const subs[] = {"add", "report", "propose"};
    if (argc < 2)
        return sl_cli_usage("invivo", "needs 'add', 'report' or 'propose'");
    int sub = -1;
    for (int i = 0; i < 3; i++)
        if (strcmp(argv[1], subs[i]) == 0)
            sub = i;
    if (sub < 0) {
        const char *near = sl_cli_closest(argv[1], subs, 3);
        if (near)
            return sl_cli_usage("invivo", "needs 'add', 'report' or 'propose', not '%s': did you "
                                          "mean %s?",
                                argv[1], near);
        return sl_cli_usage("invivo", "needs 'add', 'report' or 'propose', not '%s'", argv[1]);
    }
    static const struct option opts[] = {
        {"model", required_argument, NULL, 'm'},  {"levels", required_argument, NULL, 'l'},
        {"log", required_argument, NULL, 'L'},    {"format", required_argument, NULL, 'f'},
        {"output", required_argument, NULL, 'o'}, {"help", no_argument, NULL, 'h'},
        {"version-label", required_argument, NULL, OPT_VERSION},
        {"html", required_argument, NULL, OPT_HTML},
        {"pdf", required_argument, NULL, OPT_PDF},
        {"paper", required_argument, NULL, OPT_PAPER},
        {"scale", no_argument, NULL, OPT_SCALE},
        {NULL, 0, NULL, 0},
    };
    static const char shortopts[] = "m:l:L:f:o:h";
    const char *model_path = NULL, *levels_path = NULL, *log_path = "screening.sqlite",
               *output = NULL, *label = NULL, *html = NULL, *pdf = NULL, *paper = "a4";
    bool fmt_given = false, scale = false;
    sl_format fmt = SL_FORMAT_TEXT;
    int c;
    optind = 1;
    argc--;
    argv++;
    while ((c = getopt_long(argc, argv, shortopts, opts, NULL)) != -1) {
        switch (c) {
        case 'm': model_path = optarg; break;
        case 'l': levels_path = optarg; break;
        case 'L': log_path = optarg; break;
        case 'f':
            if (!sl_cli_format("invivo", optarg, &fmt))
                return SL_EXIT_USAGE;
            if (fmt == SL_FORMAT_CSV)
                return sl_cli_usage("invivo", "--format: text or json");
            fmt_given = true;
            break;
        case 'o': output = optarg; break;
        case OPT_VERSION:
            if (!optarg[0])
                return sl_cli_usage("invivo", "--version-label needs a label");
            label = optarg;
            break;
        case OPT_HTML: html = optarg; break;
        case OPT_SCALE: scale = true; break;
        case OPT_PDF: pdf = optarg; break;
        case OPT_PAPER:
            if (strcmp(optarg, "a4") != 0 && strcmp(optarg, "letter") != 0)
                return sl_cli_usage("invivo", "--paper needs a4 or letter, not '%s'", optarg);
            paper = optarg;
            break;
        case 'h': fputs(help, stdout); return SL_EXIT_OK;
        default: return sl_cli_bad_option(argv, opts, shortopts);
        }
    }
    int nargs = argc - optind;
    if (sub != 2 && scale)
        return sl_cli_usage("invivo", "--scale belongs to propose");
    if (sub == 0) {
        if (nargs != 1)
            return sl_cli_usage("invivo", "add needs one readings file");
        if (!model_path)
            return sl_cli_usage("invivo", "add needs --model MODEL.yaml");
        if (output || fmt_given || label || html || pdf)
            return sl_cli_usage("invivo", "add takes no --output, --format, --version-label, "
                                          "--html or --pdf");
        return cmd_add(argc, argv, argv[optind], model_path, levels_path, log_path);
    }
    if (nargs != 0)
        return sl_cli_usage("invivo", "%s takes no file arguments (the log is --log FILE)",
                            subs[sub]);
    if (levels_path)
        return sl_cli_usage("invivo", "%s takes no --levels", subs[sub]);
    if (sub != 1 && (html || pdf))
        return sl_cli_usage("invivo", "--html and --pdf belong to report");
    if (sub == 1) {
        if (label)
            return sl_cli_usage("invivo", "report takes no --version-label");
        int to_stdout = (output && strcmp(output, "-") == 0) + (html && strcmp(html, "-") == 0) +
                        (pdf && strcmp(pdf, "-") == 0);
        if (to_stdout > 1)
            return sl_cli_usage("invivo", "only one report can go to standard output");
        report_outputs ro = {output, html, pdf, paper};
        return cmd_report(model_path, log_path, fmt, &ro);
    }
    if (!model_path || !output)
        return sl_cli_usage("invivo", "propose needs --model MODEL.yaml and -o NEW.yaml");
    if (fmt_given)
        return sl_cli_usage("invivo", "propose takes no --format");
    if (strcmp(output, "-") == 0)
        return sl_cli_usage("invivo", "propose needs a file for the new model, not '-'");
    return cmd_propose(model_path, log_path, output, label, scale);
}
