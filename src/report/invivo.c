/*
 * `strayline invivo report`: the in-vivo readings of the log against their
 * estimates, grouped by machine, energy, applicator and distance band, as
 * text or JSON (json-c). Ratios are measured / estimated; the statistics
 * are on the natural log of the ratio, so a mean log ratio of 0.10 means
 * the readings run about 10 % above the estimates. The report opens with
 * what it is (a comparison of screening estimates with measurements) and
 * ends with what it cannot say.
 */
#include <math.h>
#include <stdio.h>
#include <string.h>

#include "jsonw.h"
#include "strayline/invivo.h"
#include "strayline/report.h"
#include "strayline/util.h"
#include "strayline/version.h"

static const char caution[] =
    "In-vivo readings against strayline's SCREENING estimates. A mean log ratio is "
    "ln(measured / estimated): above 0 the model under-estimates. The statistics describe "
    "these readings only; they are evidence for a qualified medical physicist to judge, "
    "under local protocols, not a commissioning.";

static void band_text(char *buf, size_t n, double lo, double hi)
{
    if (isinf(hi))
        snprintf(buf, n, "%g cm and beyond", lo);
    else
        snprintf(buf, n, "%g to %g cm", lo, hi);
}

static sl_status text(FILE *fp, const sl_invivo_report *r)
{
    const sl_log_readings *rs = r->readings;
    const sl_invivo_stats *s = r->stats;
    char a[256], b[256], c[256];
    fprintf(fp, "strayline in-vivo report: %s\n", sl_text_escape(r->log_path, a, sizeof a));
    fprintf(fp, "%s\n", caution);
    if (r->model)
        fprintf(fp, "distance bands: the transfer-uncertainty bands of model %s (version %s)\n",
                sl_text_escape(r->model->source ? r->model->source : "-", a, sizeof a),
                sl_text_escape(r->model->model_version, b, sizeof b));
    else
        fprintf(fp, "distance bands: strayline's built-in transfer-uncertainty bands (give "
                    "--model for a model's own)\n");
    if (rs->n == 0) {
        fprintf(fp, "\nno in-vivo readings in the log (add them with `strayline invivo add`)\n");
        return ferror(fp) ? SL_EIO : SL_OK;
    }
    fprintf(fp, "%zu reading%s measured %s to %s\n\n", rs->n, rs->n == 1 ? "" : "s",
            s->first_date, s->last_date);
    for (size_t i = 0; i < s->ngroups; i++) {
        const sl_invivo_group *g = &s->groups[i];
        char band[64];
        band_text(band, sizeof band, g->band_lo_cm, g->band_hi_cm);
        fprintf(fp, "machine %s, %s MeV, applicator %s, %s from the field edge: n = %zu\n",
                sl_text_escape(g->machine, a, sizeof a), sl_text_escape(g->energy, b, sizeof b),
                sl_text_escape(g->applicator, c, sizeof c), band, g->n);
        fprintf(fp, "  mean log ratio %+.3f (ratio %.3f)", g->mean_log_ratio,
                exp(g->mean_log_ratio));
        if (g->n >= 2 && isfinite(g->ci_lo)) {
            fprintf(fp, ", 95 %% CI %+.3f to %+.3f (ratio %.3f to %.3f)\n", g->ci_lo, g->ci_hi,
                    exp(g->ci_lo), exp(g->ci_hi));
            fprintf(fp, "  spread (SD of log ratio) %.3f, 95 %% interval %.3f to %.3f\n",
                    g->sd_log_ratio, g->sd_lo, g->sd_hi);
            if (isfinite(g->p_bias))
                fprintf(fp, "  bias: t = %.2f on %zu degrees of freedom, p = %.3g: %s\n", g->t,
                        g->n - 1, g->p_bias,
                        g->p_bias < 0.05 ? "significant at 5 %" : "not significant at 5 %");
            fprintf(fp,
                    "  spread beyond the stated uncertainties: chi-square %.2f on %zu degrees "
                    "of freedom, p = %.3g: %s; extra SD %.3f\n",
                    g->chi2, g->n - 1, g->p_spread,
                    g->p_spread < 0.05 ? "more spread than stated" : "explained",
                    g->extra_sd);
        } else {
            fprintf(fp, "; one reading: no interval or test\n");
        }
        fprintf(fp, "  outliers (more than k = 2 from the estimate): %zu\n", g->noutliers);
    }
    fprintf(fp, "\nreadings (ratio = measured / estimated; u are standard uncertainties, k = 1)\n");
    fprintf(fp, "%-10s  %-10s  %-14s  %-7s  %8s  %12s  %12s  %7s  %7s  %s\n", "reading", "date",
            "patient ID", "energy", "dist_cm", "measured_cGy", "estimate_cGy", "ratio",
            "u_ln", "flag");
    for (size_t i = 0; i < rs->n; i++) {
        const sl_log_reading *x = &rs->r[i];
        char d[1100];
        fprintf(fp, "%-10s  %-10s  %-14s  %-7s  %8.2f  %12.4g  %12.4g  %7.3f  %7.3f  %s\n",
                sl_text_escape(x->reading_id, a, sizeof a), x->date,
                sl_text_escape(x->patient_id, b, sizeof b),
                sl_text_escape(x->energy, c, sizeof c), x->distance_cm, x->measured_cgy,
                x->estimate_cgy, exp(x->log_ratio), x->u_log_ratio,
                x->flagged ? "OUTLIER" : "");
        if (!isfinite(x->energy_correction))
            fprintf(fp, "    no energy correction applied to this reading\n");
        if (x->flagged && x->check)
            fprintf(fp, "    %s\n", sl_text_escape(x->check, d, sizeof d));
    }
    return ferror(fp) ? SL_EIO : SL_OK;
}

static sl_status json(FILE *fp, const sl_invivo_report *r, sl_error *err)
{
    jw w = {err, SL_OK};
    const sl_log_readings *rs = r->readings;
    const sl_invivo_stats *s = r->stats;
    json_object *root = json_object_new_object();
    jw_str(&w, root, "report", "strayline in-vivo readings against screening estimates");
    jw_str(&w, root, "caution", caution);
    jw_str(&w, root, "tool_version", sl_version());
    jw_str(&w, root, "log", r->log_path);
    jw_str(&w, root, "bands_from", r->model ? r->model->source : "strayline built-in bands");
    jw_int(&w, root, "readings_count", (long long)rs->n);
    jw_str(&w, root, "first_date", rs->n ? s->first_date : NULL);
    jw_str(&w, root, "last_date", rs->n ? s->last_date : NULL);
    json_object *groups = json_object_new_array();
    for (size_t i = 0; i < s->ngroups; i++) {
        const sl_invivo_group *g = &s->groups[i];
        json_object *o = json_object_new_object();
        jw_str(&w, o, "machine", g->machine);
        jw_str(&w, o, "energy_mev", g->energy);
        jw_str(&w, o, "applicator", g->applicator);
        jw_num(&w, o, "band_from_cm", g->band_lo_cm);
        /* the last band has no upper edge: null */
        jw_num_opt(&w, o, "band_below_cm", isinf(g->band_hi_cm) ? NAN : g->band_hi_cm);
        jw_int(&w, o, "n", (long long)g->n);
        jw_num(&w, o, "mean_log_ratio", g->mean_log_ratio);
        jw_num(&w, o, "mean_ratio", exp(g->mean_log_ratio));
        jw_num_opt(&w, o, "mean_log_ratio_ci95_low", g->ci_lo);
        jw_num_opt(&w, o, "mean_log_ratio_ci95_high", g->ci_hi);
        jw_num_opt(&w, o, "sd_log_ratio", g->sd_log_ratio);
        jw_num_opt(&w, o, "sd_log_ratio_ci95_low", g->sd_lo);
        jw_num_opt(&w, o, "sd_log_ratio_ci95_high", g->sd_hi);
        jw_num_opt(&w, o, "bias_t", g->t);
        jw_num_opt(&w, o, "bias_p", g->p_bias);
        jw_num_opt(&w, o, "spread_chi2", g->chi2);
        jw_num_opt(&w, o, "spread_p", g->p_spread);
        jw_num_opt(&w, o, "extra_sd_log_ratio", g->extra_sd);
        jw_int(&w, o, "outliers", (long long)g->noutliers);
        json_object *ids = json_object_new_array();
        for (size_t k = 0; k < g->n; k++)
            jw_append(&w, ids, json_object_new_string(rs->r[g->idx[k]].reading_id));
        jw_put(&w, o, "readings", ids);
        jw_append(&w, groups, o);
    }
    jw_put(&w, root, "groups", groups);
    json_object *arr = json_object_new_array();
    for (size_t i = 0; i < rs->n; i++) {
        const sl_log_reading *x = &rs->r[i];
        json_object *o = json_object_new_object();
        jw_str(&w, o, "reading", x->reading_id);
        jw_str(&w, o, "date", x->date);
        jw_str(&w, o, "added_at_utc", x->added_at);
        jw_str(&w, o, "patient_id", x->patient_id);
        jw_str(&w, o, "plan_uid", x->plan_uid);
        jw_str(&w, o, "position", x->position);
        jw_str(&w, o, "detector", x->detector);
        jw_str(&w, o, "machine", x->machine);
        jw_str(&w, o, "energy_mev", x->energy);
        jw_str(&w, o, "applicator", x->applicator);
        jw_num(&w, o, "distance_cm", x->distance_cm);
        jw_num_opt(&w, o, "depth_cm", x->depth_cm);
        jw_int(&w, o, "fractions", x->fractions);
        jw_num(&w, o, "reading_cgy", x->reading_cgy);
        jw_num_opt(&w, o, "energy_correction", x->energy_correction);
        jw_num(&w, o, "measured_cgy", x->measured_cgy);
        jw_num(&w, o, "u_measured_cgy", x->u_measured_cgy);
        jw_num(&w, o, "estimate_cgy", x->estimate_cgy);
        jw_num(&w, o, "u_estimate_cgy", x->u_estimate_cgy);
        jw_num(&w, o, "u_transfer_cgy", x->u_transfer_cgy);
        /* the estimate's budget at the point (k = 1); null where not recorded */
        json_object *b = json_object_new_object();
        jw_num_opt(&w, b, "fit_cgy", x->budget.fit_cgy);
        jw_num_opt(&w, b, "measurement_cgy", x->budget.measurement_cgy);
        jw_num_opt(&w, b, "interpolation_cgy", x->budget.interpolation_cgy);
        jw_num_opt(&w, b, "extrapolation_cgy", x->budget.extrapolation_cgy);
        jw_num_opt(&w, b, "standin_cgy", x->budget.standin_cgy);
        jw_num(&w, b, "transfer_cgy", x->budget.transfer_cgy);
        jw_num_opt(&w, b, "setup_shift_cgy", x->budget.setup_cgy);
        jw_num_opt(&w, b, "tilt_ssd_cgy", x->budget.uncommissioned_cgy);
        jw_num(&w, b, "combined_cgy", x->budget.combined_cgy);
        jw_put(&w, o, "estimate_uncertainty_budget", b);
        jw_num(&w, o, "log_ratio", x->log_ratio);
        jw_num(&w, o, "u_log_ratio", x->u_log_ratio);
        jw_bool(&w, o, "flagged", x->flagged);
        jw_str(&w, o, "check", x->check);
        jw_str(&w, o, "model_version", x->model_version);
        jw_str(&w, o, "model_sha256", x->model_sha256);
        jw_append(&w, arr, o);
    }
    jw_put(&w, root, "readings", arr);
    return jw_write(&w, root, fp);
}

sl_status sl_report_invivo(FILE *fp, sl_format fmt, const sl_invivo_report *r, sl_error *err)
{
    if (fmt == SL_FORMAT_JSON)
        return json(fp, r, err);
    if (fmt != SL_FORMAT_TEXT)
        return sl_error_set(err, SL_EUSAGE, "invivo report: formats text and json");
    sl_status st = text(fp, r);
    return st == SL_OK ? SL_OK : sl_error_set(err, st, "output error");
}
