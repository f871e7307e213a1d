/*
 * The fit report as a PDF (`fit --report-pdf`): one page for each energy and
 * applicator, its profiles as small multiples drawn by the same figure code
 * as the HTML fit report, after a first page that says which machine and
 * measurement set the model came from and lists the poor fits. Hundreds of
 * profiles print on a few dozen pages, not one a page.
 */
#include "strayline/report.h"
#include "strayline/version.h"

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

#include "figure.h"
#include "pdf.h"

typedef struct fit_ctx {
    const sl_measurement_set *ms;
    const sl_model *m;
} fit_ctx;

static void compose(pdoc *d, const void *ctx)
{
    const sl_measurement_set *ms = ((const fit_ctx *)ctx)->ms;
    const sl_model *m = ((const fit_ctx *)ctx)->m;
    char line[1200];
    pdoc_heading(d, "Fit report: peripheral dose against distance from the field edge",
                 15);
    if (m->notice)
        pdoc_banner(d, m->notice, 10, 2.5, 0, 0, 0, false);
    snprintf(line, sizeof line,
             "Machine %s; model version %s; %zu profiles. Dose in percent of the "
             "central-axis maximum; each panel one insert, depth and direction; points "
             "with 2 standard uncertainties, the fit with its 2-sigma band, and the "
             "normalised residuals.",
             m->machine.name, m->model_version, m->nprofiles);
    pdoc_para(d, line, 9, false);
    size_t poor = 0;
    for (size_t i = 0; i < m->nprofiles; i++)
        poor += m->profiles[i].fit.poor;
    snprintf(line, sizeof line, "Poor fits: %zu of %zu.", poor, m->nprofiles);
    pdoc_para(d, line, 9, true);
    for (size_t i = 0; i < m->nprofiles; i++) {
        const sl_model_profile *p = &m->profiles[i];
        if (!p->fit.poor)
            continue;
        snprintf(line, sizeof line, "\u2022 %g MeV, applicator %s, insert %s, depth %.2f cm",
                 p->energy_mev, p->applicator, p->insert, p->depth_cm);
        pdoc_para(d, line, 8.5, false);
    }
    for (size_t i = 0; i < m->nprofiles; i++) {
        const sl_model_profile *p = &m->profiles[i];
        bool seen = false;
        size_t n = 0;
        for (size_t k = 0; k < m->nprofiles; k++) {
            const sl_model_profile *q = &m->profiles[k];
            if (q->energy_mev == p->energy_mev && strcmp(q->applicator, p->applicator) == 0) {
                seen |= k < i;
                n++;
            }
        }
        if (seen)
            continue;
        /* an energy and applicator a page */
        pdoc_new_page(d);
        snprintf(line, sizeof line, "%g MeV, applicator %s: %zu profiles", p->energy_mev,
                 p->applicator, n);
        pdoc_heading(d, line, 12);
        double tw = d->w - d->left - d->right;
        double fh = d->h - d->bottom - d->y - 8;
        /* at most 6 rows (insert, direction, SSD, tilt) a page */
        size_t cols, rows = fig_profiles_rows(m, p->energy_mev, p->applicator, &cols);
        for (size_t r = 0; r < rows; r += 6) {
            if (r) {
                pdoc_new_page(d);
                snprintf(line, sizeof line, "%g MeV, applicator %s (continued)",
                         p->energy_mev, p->applicator);
                pdoc_heading(d, line, 12);
                fh = d->h - d->bottom - d->y - 8;
            }
            size_t nr = rows - r < 6 ? rows - r : 6;
            fig_profiles_ctx fctx = {ms, m, p->energy_mev, p->applicator, r, nr};
            pdoc_figure(d, tw, rows <= 6 ? fh : fh * (double)nr / 6.0, fig_profiles, &fctx);
        }
    }
}

sl_status sl_report_fit_pdf(const sl_measurement_set *ms, const sl_model *m, const char *paper,
                            unsigned char **pdf, size_t *len, sl_error *err)
{
    *pdf = NULL;
    *len = 0;
    pdoc d;
    memset(&d, 0, sizeof d);
    snprintf(d.head_left, sizeof d.head_left, "strayline fit report: out-of-field profiles");
    snprintf(d.head_right, sizeof d.head_right, "machine %s, model version %s", m->machine.name,
             m->model_version);
    snprintf(d.foot_left, sizeof d.foot_left, "fitted from %s; strayline %s",
             ms && ms->source ? ms->source : (m->source ? m->source : "-"), sl_version());
    fit_ctx c = {ms, m};
    return pdoc_render(&d, paper, compose, &c, pdf, len, err);
}
