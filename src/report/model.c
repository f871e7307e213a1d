/*
 * `model show` and `model eval` output: what a model file commissions, and
 * one evaluation with its uncertainty budget and flags.
 */
#include "strayline/commission.h"
#include "strayline/report.h"
#include "strayline/version.h"

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "jsonw.h"

/* The distinct (energy, applicator, insert) combinations, in file order. */
typedef struct combo {
    double energy;
    const char *app, *insert;
} combo;

static size_t combos(const sl_model *m, combo *out)
{
    size_t n = 0;
    for (size_t i = 0; i < m->nprofiles; i++) {
        const sl_model_profile *p = &m->profiles[i];
        size_t k = 0;
        while (k < n && !(fabs(out[k].energy - p->energy_mev) < 0.01 &&
                          strcmp(out[k].app, p->applicator) == 0 &&
                          strcmp(out[k].insert, p->insert) == 0))
            k++;
        if (k == n)
            out[n++] = (combo){p->energy_mev, p->applicator, p->insert};
    }
    return n;
}

static bool in_combo(const sl_model_profile *p, const combo *c)
{
    return fabs(c->energy - p->energy_mev) < 0.01 && strcmp(c->app, p->applicator) == 0 &&
           strcmp(c->insert, p->insert) == 0;
}

static double cutout_factor(const sl_output_spec *o, const char *insert)
{
    for (size_t k = 0; o && k < o->nfactors; k++) {
        if (strcmp(o->factors[k].insert, insert) == 0)
            return o->factors[k].factor;
    }
    return NAN;
}

static void text_show(FILE *fp, const sl_model *m)
{
    const sl_machine *mc = &m->machine;
    fprintf(fp, "model %s (SHA-256 %s)\n", m->source ? m->source : "-", m->sha256);
    if (m->notice)
        fprintf(fp, "  %s\n", m->notice);
    fprintf(fp, "  machine %s%s%s, nominal SSD %.1f cm, SAD %.1f cm\n", mc->name,
            mc->description ? ": " : "", mc->description ? mc->description : "",
            mc->nominal_ssd_cm, mc->sad_cm);
    fprintf(fp, "  model version %s, created %s by %s\n", m->model_version,
            m->provenance.created, m->provenance.tool);
    fprintf(fp, "  from %s (SHA-256 %s), measured %s by %s with %s\n",
            m->provenance.measurement_set, m->provenance.measurement_set_sha256,
            m->provenance.measured_date, m->provenance.measured_by, m->provenance.detector);
    fprintf(fp, "  doses are %s\n", m->provenance.reference);
    /* where the transfer uncertainty came from: the defaults, a published
     * stand-in, or the clinic's own in-vivo readings (invivo propose) */
    fprintf(fp, "  transfer uncertainty (relative, k = 1, by distance from the field edge):");
    for (size_t i = 0; i < mc->transfer.nbands; i++) {
        if (isfinite(mc->transfer.bands[i].below_cm))
            fprintf(fp, "%s below %g cm %.3f", i ? "," : "", mc->transfer.bands[i].below_cm,
                    mc->transfer.bands[i].relative);
        else
            fprintf(fp, "%s beyond %.3f", i ? "," : "", mc->transfer.bands[i].relative);
    }
    fprintf(fp, "\n    from %s [%s]%s\n", mc->transfer.source, mc->transfer.mark,
            mc->transfer.is_default ? " (built-in defaults: the model file states none)" : "");
    /* in-vivo scale factors (invivo propose --scale) with their evidence */
    for (size_t i = 0; i < m->nscales; i++) {
        const sl_model_scale *s = &m->scales[i];
        fprintf(fp, "  IN-VIVO SCALE %g MeV, applicator %s: dose times %.4f (relative "
                    "uncertainty %.4f in the transfer part)\n    from %d readings %s to %s: mean "
                    "log ratio measured/estimated %.4f, 95 %% interval %.4f to %.4f, t test p = "
                    "%.3g; %s\n",
                s->energy_mev, s->applicator, s->factor, sl_model_scale_rel_u(s), s->readings,
                s->first_date, s->last_date, s->mean_log_ratio, s->ci_lo, s->ci_hi, s->p_value,
                s->source);
    }
    fprintf(fp, "  applicators:");
    for (size_t i = 0; i < mc->napplicators; i++)
        fprintf(fp, "%s %s (%s %g x %g cm)", i ? "," : "", mc->applicators[i].id,
                mc->applicators[i].shape, mc->applicators[i].x_cm, mc->applicators[i].y_cm);
    fputc('\n', fp);
    if (mc->ninserts) {
        fprintf(fp, "  inserts:");
        for (size_t i = 0; i < mc->ninserts; i++)
            fprintf(fp, "%s %s in %s (%s %g x %g cm)", i ? "," : "", mc->inserts[i].id,
                    mc->inserts[i].applicator, mc->inserts[i].shape, mc->inserts[i].x_cm,
                    mc->inserts[i].y_cm);
        fputc('\n', fp);
    }
    combo *cs = malloc((m->nprofiles ? m->nprofiles : 1) * sizeof *cs);
    if (!cs)
        return;
    size_t n = combos(m, cs);
    fprintf(fp, "\n  %6s %-6s %-6s %-30s %-10s %8s %7s %8s %7s %-16s %s\n", "energy", "applic.",
            "insert", "depths", "range", "dose/MU", "dmax", "SSD eff", "factor", "forms",
            "worst reduced chi2");
    fprintf(fp, "  %6s %-6s %-6s %-30s %-10s %8s %7s %8s %7s\n", "MeV", "", "", "cm", "cm", "cGy",
            "cm", "cm", "");
    for (size_t k = 0; k < n; k++) {
        char depths[64] = "", range[32];
        double lo = INFINITY, hi = -INFINITY, worst = 0;
        size_t peaked = 0, count = 0, poor = 0;
        for (size_t i = 0; i < m->nprofiles; i++) {
            const sl_model_profile *p = &m->profiles[i];
            if (!in_combo(p, &cs[k]))
                continue;
            count++;
            peaked += p->fit.form == SL_FORM_PEAKED;
            poor += p->fit.poor;
            worst = fmax(worst, p->fit.chi2_red);
            lo = fmin(lo, p->fit.range_lo_cm);
            hi = fmax(hi, p->fit.range_hi_cm);
        }
        /* the depths, once each, in order (the evaluation's own grouping) */
        sl_curve_set *cv = NULL;
        unsigned fl;
        if (sl_model_select(m, cs[k].energy, cs[k].app, cs[k].insert, &cv, &fl, NULL) == SL_OK) {
            const double *dv;
            size_t nd = sl_curves_depths(cv, &dv);
            for (size_t i = 0; i < nd; i++) {
                char d[16];
                snprintf(d, sizeof d, "%s%g", i ? ", " : "", dv[i]);
                strncat(depths, d, sizeof depths - strlen(depths) - 1);
            }
            sl_curve_set_free(cv);
        }
        snprintf(range, sizeof range, "%g-%g", lo, hi);
        const sl_output_spec *o = sl_machine_output(&m->machine, cs[k].energy, cs[k].app);
        double cf = strcmp(cs[k].insert, SL_INSERT_OPEN) == 0 ? 1.0 : cutout_factor(o, cs[k].insert);
        char forms[32], factor[16];
        snprintf(forms, sizeof forms, "%zu peaked/%zu", peaked, count);
        if (isfinite(cf))
            snprintf(factor, sizeof factor, "%.3f", cf);
        else
            snprintf(factor, sizeof factor, "-");
        fprintf(fp, "  %6g %-7s %-6s %-30s %-10s %8.3f %7.2f %8.1f %7s %-16s %.2f%s\n",
                cs[k].energy, cs[k].app, cs[k].insert, depths, range, o ? o->dose_per_mu_cgy : NAN,
                o ? o->dmax_cm : NAN, o ? o->effective_ssd_cm : NAN, factor, forms, worst,
                poor ? " (poor fits)" : "");
    }
    /* the tilt and SSD dimensions, where a combination has more than one */
    bool head = false;
    for (size_t k = 0; k < n; k++) {
        sl_curve_set *cv = NULL;
        unsigned fl;
        if (sl_model_select(m, cs[k].energy, cs[k].app, cs[k].insert, &cv, &fl, NULL) != SL_OK)
            continue;
        const double *tv, *sv;
        size_t nt = sl_curves_tilts(cv, &tv), ns = sl_curves_ssds(cv, &sv);
        if (nt > 1 || ns > 1 || tv[0] != 0 || sv[0] != mc->nominal_ssd_cm) {
            if (!head)
                fprintf(fp, "\n  beam tilts (deg) and SSDs (cm) commissioned, where other than "
                            "0 deg at the nominal SSD only:\n");
            head = true;
            fprintf(fp, "  %6g %-7s %-6s tilts", cs[k].energy, cs[k].app, cs[k].insert);
            for (size_t i = 0; i < nt; i++)
                fprintf(fp, "%s %+g", i ? "," : "", tv[i]);
            fprintf(fp, "; SSDs");
            for (size_t i = 0; i < ns; i++)
                fprintf(fp, "%s %g", i ? "," : "", sv[i]);
            fputc('\n', fp);
        }
        sl_curve_set_free(cv);
    }
    for (size_t i = 0; i < mc->noutputs; i++) {
        const sl_output_spec *o = &mc->outputs[i];
        if (o->ssd_cm != mc->nominal_ssd_cm)
            fprintf(fp, "  output of %g MeV %s at SSD %g cm: %.3f cGy/MU, dmax %.2f cm, SSD eff "
                        "%.1f cm\n",
                    o->energy_mev, o->applicator, o->ssd_cm, o->dose_per_mu_cgy, o->dmax_cm,
                    o->effective_ssd_cm);
    }
    free(cs);
}

static json_object *json_show(jw *w, const sl_model *m)
{
    const sl_machine *mc = &m->machine;
    json_object *root = json_object_new_object();
    jw_str(w, root, "tool", "strayline");
    jw_str(w, root, "version", sl_version());
    jw_str(w, root, "model_file", m->source);
    jw_str(w, root, "model_sha256", m->sha256);
    jw_str(w, root, "model_version", m->model_version);
    jw_int(w, root, "format_version", m->format_version);
    jw_str(w, root, "notice", m->notice);
    json_object *mo = json_object_new_object();
    jw_str(w, mo, "name", mc->name);
    jw_str(w, mo, "description", mc->description);
    jw_num(w, mo, "nominal_ssd_cm", mc->nominal_ssd_cm);
    jw_num(w, mo, "sad_cm", mc->sad_cm);
    jw_bool(w, mo, "invented", mc->invented);
    jw_put(w, root, "machine", mo);
    json_object *prov = json_object_new_object();
    jw_str(w, prov, "measurement_set", m->provenance.measurement_set);
    jw_str(w, prov, "measurement_set_sha256", m->provenance.measurement_set_sha256);
    jw_str(w, prov, "tool", m->provenance.tool);
    jw_str(w, prov, "created", m->provenance.created);
    jw_str(w, prov, "measured_date", m->provenance.measured_date);
    jw_str(w, prov, "measured_by", m->provenance.measured_by);
    jw_str(w, prov, "detector", m->provenance.detector);
    jw_str(w, prov, "reference", m->provenance.reference);
    jw_put(w, root, "provenance", prov);
    json_object *tr = json_object_new_object();
    jw_str(w, tr, "source", mc->transfer.source);
    jw_str(w, tr, "mark", mc->transfer.mark);
    jw_bool(w, tr, "built_in_defaults", mc->transfer.is_default);
    json_object *bands = json_object_new_array();
    for (size_t i = 0; i < mc->transfer.nbands; i++) {
        json_object *b = json_object_new_object();
        jw_num_opt(w, b, "below_cm", isfinite(mc->transfer.bands[i].below_cm)
                                         ? mc->transfer.bands[i].below_cm
                                         : NAN);
        jw_num(w, b, "relative", mc->transfer.bands[i].relative);
        jw_append(w, bands, b);
    }
    jw_put(w, tr, "bands", bands);
    jw_put(w, root, "transfer_uncertainty", tr);
    json_object *scales = json_object_new_array();
    for (size_t i = 0; i < m->nscales; i++) {
        const sl_model_scale *s = &m->scales[i];
        json_object *so = json_object_new_object();
        jw_num(w, so, "energy_mev", s->energy_mev);
        jw_str(w, so, "applicator", s->applicator);
        jw_num(w, so, "factor", s->factor);
        jw_num(w, so, "relative_uncertainty", sl_model_scale_rel_u(s));
        jw_int(w, so, "readings", s->readings);
        jw_str(w, so, "first_date", s->first_date);
        jw_str(w, so, "last_date", s->last_date);
        jw_num(w, so, "mean_log_ratio", s->mean_log_ratio);
        jw_num(w, so, "mean_log_ratio_ci95_low", s->ci_lo);
        jw_num(w, so, "mean_log_ratio_ci95_high", s->ci_hi);
        jw_num(w, so, "p_value", s->p_value);
        jw_str(w, so, "source", s->source);
        jw_append(w, scales, so);
    }
    jw_put(w, root, "invivo_scales", scales);
    json_object *apps = json_object_new_array();
    for (size_t i = 0; i < mc->napplicators; i++) {
        json_object *a = json_object_new_object();
        jw_str(w, a, "id", mc->applicators[i].id);
        jw_str(w, a, "shape", mc->applicators[i].shape);
        jw_num(w, a, "field_x_cm", mc->applicators[i].x_cm);
        jw_num(w, a, "field_y_cm", mc->applicators[i].y_cm);
        jw_append(w, apps, a);
    }
    jw_put(w, root, "applicators", apps);
    combo *cs = malloc((m->nprofiles ? m->nprofiles : 1) * sizeof *cs);
    if (!cs) {
        json_object_put(root);
        w->st = sl_error_set(w->err, SL_ENOMEM, "out of memory");
        return NULL;
    }
    size_t n = combos(m, cs);
    json_object *list = json_object_new_array();
    for (size_t k = 0; k < n; k++) {
        json_object *co = json_object_new_object();
        jw_num(w, co, "energy_mev", cs[k].energy);
        jw_str(w, co, "applicator", cs[k].app);
        jw_str(w, co, "insert", cs[k].insert);
        const sl_output_spec *o = sl_machine_output(&m->machine, cs[k].energy, cs[k].app);
        jw_num(w, co, "dose_per_mu_cgy", o->dose_per_mu_cgy);
        jw_num(w, co, "dmax_cm", o->dmax_cm);
        jw_num(w, co, "effective_ssd_cm", o->effective_ssd_cm);
        jw_num_opt(w, co, "cutout_factor", strcmp(cs[k].insert, SL_INSERT_OPEN) == 0
                                               ? 1.0
                                               : cutout_factor(o, cs[k].insert));
        json_object *profs = json_object_new_array();
        for (size_t i = 0; i < m->nprofiles; i++) {
            const sl_model_profile *p = &m->profiles[i];
            if (!in_combo(p, &cs[k]))
                continue;
            json_object *po = json_object_new_object();
            jw_num(w, po, "depth_cm", p->depth_cm);
            jw_str(w, po, "direction", p->direction);
            jw_num(w, po, "tilt_deg", p->tilt_deg);
            jw_num(w, po, "ssd_cm", p->ssd_cm);
            jw_str(w, po, "form", sl_profile_form_name(p->fit.form));
            json_object *par = json_object_new_object();
            for (size_t j = 0; j < p->fit.p; j++)
                jw_num(w, par, sl_profile_param_key(j), p->fit.theta[j]);
            jw_put(w, po, "parameters", par);
            jw_num(w, po, "chi2_reduced", p->fit.chi2_red);
            jw_num(w, po, "max_residual_sigma", p->fit.max_residual_sigma);
            jw_bool(w, po, "poor", p->fit.poor);
            jw_num(w, po, "range_min_cm", p->fit.range_lo_cm);
            jw_num(w, po, "range_max_cm", p->fit.range_hi_cm);
            jw_int(w, po, "points", (long long)p->n);
            jw_append(w, profs, po);
        }
        jw_put(w, co, "profiles", profs);
        jw_append(w, list, co);
    }
    free(cs);
    jw_put(w, root, "commissioned", list);
    return root;
}

sl_status sl_report_model(FILE *fp, sl_format fmt, const sl_model *m, sl_error *err)
{
    if (fmt == SL_FORMAT_CSV)
        return sl_error_set(err, SL_EUSAGE, "model show writes text or json, not csv");
    if (fmt == SL_FORMAT_TEXT) {
        text_show(fp, m);
        return ferror(fp) ? sl_error_set(err, SL_EIO, "cannot write the output") : SL_OK;
    }
    jw w = {err, SL_OK};
    json_object *root = json_show(&w, m);
    if (!root)
        return w.st;
    return jw_write(&w, root, fp);
}

static const unsigned all_flags[] = {SL_MF_IN_FIELD,        SL_MF_DEPTH_OUTSIDE,
                                     SL_MF_EXTRAPOLATED,    SL_MF_OPEN_FOR_CUTOUT,
                                     SL_MF_POINTS_MODE,     SL_MF_POOR_FIT,
                                     SL_MF_TILT_OUTSIDE,    SL_MF_SSD_OUTSIDE,
                                     SL_MF_INVIVO_SCALED};

/* A value read from the model is a screening number too: said beside it. */
static const char eval_caution[] =
    "a screening model's value for one machine, not a measurement: confirm high values by "
    "measurement; local protocols and a qualified medical physicist decide";

sl_status sl_report_model_value(FILE *fp, sl_format fmt, const sl_model *m, double energy_mev,
                                const char *applicator, const char *insert, double depth_cm,
                                double distance_cm, const sl_model_value *v, sl_error *err)
{
    const char *ins = insert ? insert : SL_INSERT_OPEN;
    if (fmt == SL_FORMAT_CSV)
        return sl_error_set(err, SL_EUSAGE, "model eval writes text or json, not csv");
    if (fmt == SL_FORMAT_TEXT) {
        fprintf(fp, "%s: %g MeV, applicator %s, insert %s, depth %.2f cm, %.2f cm from the field "
                    "edge\n",
                m->source ? m->source : "model", energy_mev, applicator, ins, depth_cm,
                distance_cm);
        if (v->flags & SL_MF_IN_FIELD) {
            fprintf(fp, "  in field: the out-of-field model does not apply (use the planning "
                        "system's dose)\n");
        } else {
            fprintf(fp, "  dose %.4f %% of the central-axis maximum, standard uncertainty %.4f %% "
                        "(k = 1)\n",
                    v->percent, v->u_percent);
            fprintf(fp, "  uncertainty parts (%%): fit %.4f, measurement %.4f, interpolation "
                        "%.4f, extrapolation %.4f, stand-in %.4f, transfer %.4f\n",
                    v->u_fit, v->u_meas, v->u_interp, v->u_extrap, v->u_standin,
                    v->u_transfer);
            fprintf(fp, "  electron part %.4f %%, photon part %.4f %%; depth used %.2f cm\n",
                    v->electron_percent, v->photon_percent, v->depth_used_cm);
            fprintf(fp, "  tilt used %+.2f deg, SSD used %.2f cm; uncertainty tilt/SSD %.4f %%\n",
                    v->tilt_used_deg, v->ssd_used_cm, v->u_uncommissioned);
            if (v->flags & SL_MF_INVIVO_SCALED)
                fprintf(fp, "  SCALED BY IN-VIVO EVIDENCE: dose times %.4f (model file "
                            "invivo_scales; its uncertainty is in the transfer part)\n",
                        v->scale);
        }
        for (size_t i = 0; i < sizeof all_flags / sizeof *all_flags; i++) {
            if (v->flags & all_flags[i])
                fprintf(fp, "  flag: %s\n", sl_model_flag_text(all_flags[i]));
        }
        if (m->machine.invented)
            fprintf(fp, "  INVENTED DEMO DATA - NOT A REAL MACHINE - NOT FOR CLINICAL USE\n");
        fprintf(fp, "  caution: %s\n", eval_caution);
        return ferror(fp) ? sl_error_set(err, SL_EIO, "cannot write the output") : SL_OK;
    }
    jw w = {err, SL_OK};
    json_object *o = json_object_new_object();
    jw_str(&w, o, "model_file", m->source);
    jw_str(&w, o, "model_sha256", m->sha256);
    jw_bool(&w, o, "invented", m->machine.invented);
    jw_str(&w, o, "caution", eval_caution);
    jw_num(&w, o, "energy_mev", energy_mev);
    jw_str(&w, o, "applicator", applicator);
    jw_str(&w, o, "insert", ins);
    jw_num(&w, o, "depth_cm", depth_cm);
    jw_num(&w, o, "distance_cm", distance_cm);
    bool in_field = v->flags & SL_MF_IN_FIELD;
    jw_num_opt(&w, o, "dose_percent", in_field ? NAN : v->percent);
    jw_num_opt(&w, o, "uncertainty_percent", in_field ? NAN : v->u_percent);
    jw_num_opt(&w, o, "uncertainty_fit_percent", in_field ? NAN : v->u_fit);
    jw_num_opt(&w, o, "uncertainty_measurement_percent", in_field ? NAN : v->u_meas);
    jw_num_opt(&w, o, "uncertainty_interpolation_percent", in_field ? NAN : v->u_interp);
    jw_num_opt(&w, o, "uncertainty_extrapolation_percent", in_field ? NAN : v->u_extrap);
    jw_num_opt(&w, o, "uncertainty_standin_percent", in_field ? NAN : v->u_standin);
    jw_num_opt(&w, o, "uncertainty_transfer_percent", in_field ? NAN : v->u_transfer);
    jw_num_opt(&w, o, "electron_percent", in_field ? NAN : v->electron_percent);
    jw_num_opt(&w, o, "photon_percent", in_field ? NAN : v->photon_percent);
    jw_num_opt(&w, o, "uncertainty_tilt_ssd_percent", in_field ? NAN : v->u_uncommissioned);
    jw_num(&w, o, "invivo_scale", v->scale);
    jw_num(&w, o, "depth_used_cm", v->depth_used_cm);
    jw_num_opt(&w, o, "tilt_used_deg", in_field ? NAN : v->tilt_used_deg);
    jw_num_opt(&w, o, "ssd_used_cm", in_field ? NAN : v->ssd_used_cm);
    json_object *flags = json_object_new_array();
    static const char *const names[] = {"in_field", "depth_outside_commissioned_range",
                                        "extrapolated", "standin_for_uncommissioned_cutout",
                                        "points_mode", "poor_fit", "tilt_not_commissioned",
                                        "ssd_not_commissioned", "scaled_by_invivo_evidence"};
    for (size_t i = 0; i < sizeof all_flags / sizeof *all_flags; i++) {
        if (v->flags & all_flags[i])
            jw_append(&w, flags, json_object_new_string(names[i]));
    }
    jw_put(&w, o, "flags", flags);
    return jw_write(&w, o, fp);
}
