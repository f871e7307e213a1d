/*
 * The commissioning report of `strayline fit --report`: one self-contained
 * HTML page with, for every energy and applicator, one figure of its
 * profiles as small multiples on shared axes (a column a depth, a row an
 * insert, direction, SSD and tilt) (figure.h: the measured points
 * with their 2-sigma bars and the fitted curve with its 2-sigma band on a
 * log dose axis, the normalised residuals below), then each profile's
 * parameters with their standard errors and the fit statistics; poor fits
 * are listed first, not hidden.
 */
#include "strayline/commission.h"
#include "strayline/report.h"
#include "strayline/version.h"

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "figure.h"
#include "html.h"

static const char *const param_label[SL_PROFILE_MAX_PARAMS] = {
    "A (near term)", "l1", "C (tail)", "l2", "B (bump)", "mu", "s",
};
static const char *const param_unit[SL_PROFILE_MAX_PARAMS] = {
    "% of CAX max", "cm", "% of CAX max", "cm", "% of CAX max", "cm", "cm",
};

static void kv_table(hdoc *h, xmlNodePtr parent, const char *const (*rows)[2], size_t n)
{
    xmlNodePtr t = hel(h, parent, "table", NULL);
    for (size_t i = 0; i < n; i++) {
        xmlNodePtr tr = hel(h, t, "tr", NULL);
        hel(h, tr, "th", rows[i][0]);
        hel(h, tr, "td", rows[i][1] ? rows[i][1] : "-");
    }
}

static void profile_section(hdoc *h, xmlNodePtr body, const sl_model_profile *p, size_t idx,
                            double nominal_ssd_cm)
{
    char label[160], buf[256];
    sl_profile_label(p->energy_mev, p->applicator, p->insert, p->depth_cm, p->direction, label,
                     sizeof label);
    sl_profile_label_geometry(p->tilt_deg, p->ssd_cm, nominal_ssd_cm, label, sizeof label);
    xmlNodePtr sec = hel(h, body, "section", NULL);
    hattrf(h, sec, "id", "p%zu", idx + 1);
    helf(h, sec, "h3", "%zu. %s%s", idx + 1, label, p->fit.poor ? " (poor fit)" : "");
    helf(h, sec, "p", "data %s (SHA-256 %.16s...), %zu points from %.2f to %.2f cm; form %s",
         p->data_file, p->sha256, p->n, p->fit.range_lo_cm, p->fit.range_hi_cm,
         sl_profile_form_name(p->fit.form));
    xmlNodePtr t = hel(h, sec, "table", NULL);
    const char *head[] = {"parameter", "value", "standard error", "unit"};
    hrow(h, t, true, head, 4);
    for (size_t i = 0; i < p->fit.p; i++) {
        char v[32], se[32];
        snprintf(v, sizeof v, "%.4g", p->fit.theta[i]);
        snprintf(se, sizeof se, "%.2g", sqrt(p->fit.covar[i * p->fit.p + i]));
        const char *cells[] = {param_label[i], v, se, param_unit[i]};
        hrow(h, t, false, cells, 4);
    }
    char other[32] = "not fitted";
    if (isfinite(p->fit.aicc_other))
        snprintf(other, sizeof other, "%.1f", p->fit.aicc_other);
    snprintf(buf, sizeof buf,
             "chi-square %.1f on %zu degrees of freedom (reduced %.2f; covariance scaled by "
             "%.2f); AICc %.1f (other form %s); residuals: rms %.3g %% (%.1f %% of the dose), "
             "largest %.3g %% (%.1f %%, %.1f sigma)",
             p->fit.chi2, p->fit.dof, p->fit.chi2_red, p->fit.cov_scale, p->fit.aicc, other,
             p->fit.rms_residual_percent, 100 * p->fit.rms_residual_relative,
             p->fit.max_residual_percent, 100 * p->fit.max_residual_relative,
             p->fit.max_residual_sigma);
    hel(h, sec, "p", buf);
    if (p->from_positions)
        helf(h, sec, "p", "through-field profile: 50 %% width found %.2f cm, nominal %.2f cm",
             p->width_found_cm, p->width_nominal_cm);
}

sl_status sl_report_fit_html(FILE *fp, const sl_measurement_set *ms, const sl_model *m,
                             sl_error *err)
{
    hdoc h;
    char title[256];
    snprintf(title, sizeof title, "strayline commissioning fits: %s", m->machine.name);
    if (!hdoc_new(&h, title, sl_report_css))
        return sl_error_set(err, SL_ENOMEM, "out of memory building the HTML report");
    xmlNodePtr b = h.body;
    hel(&h, b, "h1", title);
    if (m->notice)
        hattr(&h, hel(&h, b, "p", m->notice), "class", "notice");
    xmlNodePtr caution = hel(&h, b, "div", NULL);
    hattr(&h, caution, "class", "caution");
    hel(&h, caution, "p",
        "These are empirical fits to one machine's measurements. Check every figure before the "
        "model is released for screening use; a qualified medical physicist decides.");
    char nprof[32], poor_s[32];
    size_t poor = 0;
    for (size_t i = 0; i < m->nprofiles; i++)
        poor += m->profiles[i].fit.poor;
    snprintf(nprof, sizeof nprof, "%zu", m->nprofiles);
    snprintf(poor_s, sizeof poor_s, "%zu", poor);
    const char *const rows[][2] = {
        {"machine", m->machine.name},
        {"model version", m->model_version},
        {"measurement set", m->provenance.measurement_set},
        {"measurement set SHA-256", m->provenance.measurement_set_sha256},
        {"measured", m->provenance.measured_date},
        {"by", m->provenance.measured_by},
        {"detector", m->provenance.detector},
        {"doses are", m->provenance.reference},
        {"tool", m->provenance.tool},
        {"created", m->provenance.created},
        {"profiles", nprof},
        {"poor fits", poor_s},
    };
    kv_table(&h, b, rows, sizeof rows / sizeof *rows);
    hel(&h, b, "h2", "The fitted forms");
    hel(&h, b, "p",
        "smooth: D(d) = A exp(-d/l1) + C exp(-d/l2); peaked: the same plus "
        "B exp(-(d-mu)^2/(2 s^2)); d is the distance outward from the 50 % field edge (cm), D "
        "the dose in percent of the central-axis maximum. Weighted least squares (weights 1/sigma^2 "
        "from the stated uncertainty), Levenberg-Marquardt with geodesic acceleration (GSL), "
        "several starting points; the form with the lower AICc is kept.");
    if (ms && ms->notes.count) {
        hel(&h, b, "h2", "Notes");
        xmlNodePtr ul = hel(&h, b, "ul", NULL);
        for (size_t i = 0; i < ms->notes.count; i++)
            hel(&h, ul, "li", ms->notes.items[i]);
    }
    hel(&h, b, "h2", poor ? "Poor fits" : "Poor fits: none");
    if (poor) {
        xmlNodePtr ul = hel(&h, b, "ul", NULL);
        for (size_t i = 0; i < m->nprofiles; i++) {
            const sl_model_profile *p = &m->profiles[i];
            if (!p->fit.poor)
                continue;
            char label[160];
            sl_profile_label(p->energy_mev, p->applicator, p->insert, p->depth_cm, p->direction,
                             label, sizeof label);
            sl_profile_label_geometry(p->tilt_deg, p->ssd_cm, m->machine.nominal_ssd_cm, label,
                                      sizeof label);
            xmlNodePtr li = hel(&h, ul, "li", NULL);
            xmlNodePtr a = helf(&h, li, "a", "%s", label);
            hattrf(&h, a, "href", "#p%zu", i + 1);
            char tail[128];
            snprintf(tail, sizeof tail, ": reduced chi-square %.2f, largest residual %.1f sigma",
                     p->fit.chi2_red, p->fit.max_residual_sigma);
            htext(&h, li, tail);
        }
    }
    hel(&h, b, "h2", "All profiles");
    xmlNodePtr t = hel(&h, b, "table", NULL);
    const char *head[] = {"#",           "energy MeV",   "applicator", "insert",
                          "depth cm",    "direction",    "form",       "reduced chi-square",
                          "max |res|/sigma", "range cm"};
    hrow(&h, t, true, head, 10);
    for (size_t i = 0; i < m->nprofiles; i++) {
        const sl_model_profile *p = &m->profiles[i];
        char c[10][48];
        snprintf(c[0], 48, "%zu", i + 1);
        snprintf(c[1], 48, "%g", p->energy_mev);
        snprintf(c[2], 48, "%s", p->applicator);
        snprintf(c[3], 48, "%s", p->insert);
        snprintf(c[4], 48, "%g", p->depth_cm);
        snprintf(c[5], 48, "%s", p->direction);
        snprintf(c[6], 48, "%s%s", sl_profile_form_name(p->fit.form), p->fit.poor ? " POOR" : "");
        snprintf(c[7], 48, "%.2f", p->fit.chi2_red);
        snprintf(c[8], 48, "%.1f", p->fit.max_residual_sigma);
        snprintf(c[9], 48, "%.1f-%.1f", p->fit.range_lo_cm, p->fit.range_hi_cm);
        xmlNodePtr tr = hel(&h, t, "tr", NULL);
        for (int k = 0; k < 10; k++) {
            xmlNodePtr td = hel(&h, tr, "td", k == 0 ? NULL : c[k]);
            if (k == 0) {
                xmlNodePtr a = hel(&h, td, "a", c[0]);
                hattrf(&h, a, "href", "#p%zu", i + 1);
            }
        }
    }
    /* the figures: one for each energy and applicator, its profiles as
     * small multiples on shared axes */
    hel(&h, b, "h2", "Profiles by energy and applicator");
    for (size_t i = 0; i < m->nprofiles; i++) {
        const sl_model_profile *p = &m->profiles[i];
        bool seen = false, any = false;
        size_t n = 0;
        for (size_t k = 0; k < m->nprofiles && !seen; k++) {
            const sl_model_profile *q = &m->profiles[k];
            if (q->energy_mev == p->energy_mev && strcmp(q->applicator, p->applicator) == 0) {
                if (k < i)
                    seen = true;
                any = true;
            }
        }
        if (seen || !any)
            continue;
        for (size_t k = 0; k < m->nprofiles; k++)
            n += m->profiles[k].energy_mev == p->energy_mev &&
                 strcmp(m->profiles[k].applicator, p->applicator) == 0;
        xmlNodePtr sec = hel(&h, b, "section", NULL);
        helf(&h, sec, "h3", "%g MeV, applicator %s", p->energy_mev, p->applicator);
        size_t cols, rows = fig_profiles_rows(m, p->energy_mev, p->applicator, &cols);
        (void)n;
        double fw = cols > 4 ? 160.0 * (double)cols : 640;
        fig_profiles_ctx fctx = {ms, m, p->energy_mev, p->applicator, 0, 0};
        fig_svg_into(&h, sec, fw, 50 + 150 * (double)rows, fig_profiles, &fctx);
    }
    hel(&h, b, "h2", "Profiles: fitted parameters");
    for (size_t i = 0; i < m->nprofiles; i++)
        profile_section(&h, b, &m->profiles[i], i, m->machine.nominal_ssd_cm);
    helf(&h, b, "p", "written by strayline %s", sl_version());
    return hdoc_write(&h, fp, err);
}
