/*
 * `strayline invivo report --html/--pdf`: the in-vivo report with its
 * picture, a Bland-Altman style plot of measured / estimated against the
 * distance from the field edge (log ratio axis: a model wrong by a factor
 * sits as far above 1 as below), each reading with its 2-sigma bar, the
 * mean ratio and the 95 % limits of agreement (mean log ratio +/- 1.96 SD).
 * Drawn once with cairo (figure.h) for the HTML (libxml2 tree, inline SVG)
 * and the PDF (pdf.h pages), so both show the same picture.
 */
#include <math.h>
#include <stdio.h>
#include <string.h>
#include <time.h>

#include "figure.h"
#include "html.h"
#include "pdf.h"
#include "strayline/invivo.h"
#include "strayline/version.h"

static const char caution[] =
    "In-vivo readings against strayline's SCREENING estimates. The ratio is measured / "
    "estimated; above 1 the model under-estimates. The statistics describe these readings "
    "only: evidence for a qualified medical physicist to judge under local protocols, not a "
    "commissioning.";

/* -------------------------------------------------------- the plot -- */

static void fig_invivo_ratio(cairo_t *cr, double w, double h, const void *ctx)
{
    const sl_log_readings *rs = ctx;
    double fs = 9;
    fig_font f = {fs, false, false};
    double xmax = 5, rmin = 1, rmax = 1, sum = 0, sum2 = 0;
    for (size_t i = 0; i < rs->n; i++) {
        const sl_log_reading *r = &rs->r[i];
        xmax = fmax(xmax, r->distance_cm * 1.05);
        /* the range follows the readings, not their bars: one reading with
         * a wide budget would otherwise flatten the rest (its bar is cut
         * at the frame, and the tables give its numbers) */
        rmin = fmin(rmin, exp(r->log_ratio));
        rmax = fmax(rmax, exp(r->log_ratio));
        sum += r->log_ratio;
        sum2 += r->log_ratio * r->log_ratio;
    }
    double n = (double)rs->n, mean = n ? sum / n : 0;
    double sd = n > 1 ? sqrt(fmax(0, (sum2 - n * mean * mean) / (n - 1))) : NAN;
    const char *legend = "\u25CF reading with its 2-sigma bar (cut at the frame); \u25B2 beyond "
                         "k = 2 (outlier); "
                         "solid: ratio 1; dashed: mean ratio; dotted: 95 % limits of agreement "
                         "(mean log ratio \u00B1 1.96 SD)";
    double tw, th;
    fig_text_size(cr, legend, f, w, &tw, &th);
    fig_axes ax = {fs * 6, fs * 0.8, 0, 0, 0, xmax, 0, 0, true};
    ax.w = w - ax.x - fs;
    ax.h = h - ax.y - fs * 3.4 - th - 4;
    if (ax.h < 30 || ax.w < 30)
        return;
    if (isfinite(sd)) {
        rmin = fmin(rmin, exp(mean - 1.96 * sd));
        rmax = fmax(rmax, exp(mean + 1.96 * sd));
    }
    fig_log_range(rmin * 0.95, rmax * 1.05, &ax.y0, &ax.y1);
    fig_axes_draw(cr, &ax, "distance from the field edge (cm)", "measured / estimated", true,
                  true, fs);
    cairo_save(cr);
    cairo_rectangle(cr, ax.x, ax.y, ax.w, ax.h);
    cairo_clip(cr);
    /* ratio 1, the mean and the limits of agreement */
    double lines[3] = {mean, mean - 1.96 * sd, mean + 1.96 * sd};
    cairo_set_source_rgb(cr, 0, 0, 0);
    cairo_set_line_width(cr, 0.9);
    cairo_move_to(cr, ax.x, fig_ax_y(&ax, 1));
    cairo_line_to(cr, ax.x + ax.w, fig_ax_y(&ax, 1));
    cairo_stroke(cr);
    for (int k = 0; k < 3 && rs->n; k++) {
        if (!isfinite(lines[k]))
            continue;
        double dash[2] = {k ? 1.5 : 5, k ? 2 : 3};
        cairo_set_dash(cr, dash, 2, 0);
        cairo_set_source_rgb(cr, 0.15, 0.35, 0.7);
        cairo_move_to(cr, ax.x, fig_ax_y(&ax, exp(lines[k])));
        cairo_line_to(cr, ax.x + ax.w, fig_ax_y(&ax, exp(lines[k])));
        cairo_stroke(cr);
    }
    cairo_set_dash(cr, NULL, 0, 0);
    size_t npts = 0;
    for (size_t i = 0; i < rs->n; i++) {
        const sl_log_reading *r = &rs->r[i];
        double px = fig_ax_x(&ax, r->distance_cm), py = fig_ax_y(&ax, exp(r->log_ratio));
        cairo_set_source_rgb(cr, 0.3, 0.3, 0.3);
        cairo_set_line_width(cr, 0.7);
        cairo_move_to(cr, px, fig_ax_y(&ax, exp(r->log_ratio - 2 * r->u_log_ratio)));
        cairo_line_to(cr, px, fig_ax_y(&ax, exp(r->log_ratio + 2 * r->u_log_ratio)));
        cairo_stroke(cr);
        if (r->flagged) {
            cairo_set_source_rgb(cr, 0.75, 0.1, 0.1);
            cairo_move_to(cr, px, py - 4);
            cairo_line_to(cr, px + 3.6, py + 2.6);
            cairo_line_to(cr, px - 3.6, py + 2.6);
            cairo_close_path(cr);
        } else {
            cairo_set_source_rgb(cr, 0.1, 0.1, 0.1);
            cairo_arc(cr, px, py, 2.6, 0, 2 * M_PI);
        }
        cairo_fill(cr);
        npts++;
    }
    cairo_restore(cr);
    fig_count(cr, "points", "%zu", npts);
    fig_text(cr, 0, h - th, 0, 0, legend, f, w);
}

/* ------------------------------------------------------------- HTML -- */

static void group_cells(const sl_invivo_group *g, char c[9][96])
{
    snprintf(c[0], 96, "%s", g->machine);
    snprintf(c[1], 96, "%s MeV, %s", g->energy, g->applicator);
    if (isinf(g->band_hi_cm))
        snprintf(c[2], 96, "%g cm and beyond", g->band_lo_cm);
    else
        snprintf(c[2], 96, "%g to %g cm", g->band_lo_cm, g->band_hi_cm);
    snprintf(c[3], 96, "%zu", g->n);
    if (g->n >= 2 && isfinite(g->ci_lo)) {
        snprintf(c[4], 96, "%.3f (%.3f to %.3f)", exp(g->mean_log_ratio), exp(g->ci_lo),
                 exp(g->ci_hi));
        snprintf(c[5], 96, "%.3f (%.3f to %.3f)", g->sd_log_ratio, g->sd_lo, g->sd_hi);
        if (isfinite(g->p_bias))
            snprintf(c[6], 96, "p = %.3g%s", g->p_bias, g->p_bias < 0.05 ? ": significant" : "");
        else
            snprintf(c[6], 96, "-");
        snprintf(c[7], 96, "p = %.3g%s; extra SD %.3f", g->p_spread,
                 g->p_spread < 0.05 ? ": more than stated" : "", g->extra_sd);
    } else {
        snprintf(c[4], 96, "%.3f (one reading)", exp(g->mean_log_ratio));
        snprintf(c[5], 96, "-");
        snprintf(c[6], 96, "-");
        snprintf(c[7], 96, "-");
    }
    snprintf(c[8], 96, "%zu", g->noutliers);
}

static const char *const group_head[] = {
    "machine", "energy, applicator", "distance band", "n",
    "mean ratio (95 % CI)", "SD of ln ratio (95 % interval)", "bias (t test)",
    "spread vs stated u (chi-square)", "outliers"};

static void reading_cells(const sl_log_reading *r, char c[8][160])
{
    snprintf(c[0], 160, "%s", r->reading_id);
    snprintf(c[1], 160, "%s", r->date);
    snprintf(c[2], 160, "%s", r->patient_id);
    snprintf(c[3], 160, "%s; %s MeV %s", r->position, r->energy, r->applicator);
    snprintf(c[4], 160, "%.2f", r->distance_cm);
    snprintf(c[5], 160, "%.4g (%s%s)", r->measured_cgy, r->detector,
             isfinite(r->energy_correction) ? "" : ", no energy correction");
    snprintf(c[6], 160, "%.4g \u00B1 %.2g", r->estimate_cgy, r->u_estimate_cgy);
    snprintf(c[7], 160, "%.3f%s", exp(r->log_ratio), r->flagged ? " OUTLIER" : "");
}

static const char *const reading_head[] = {
    "reading", "date", "patient ID", "position", "distance (cm)", "measured (cGy)",
    "estimate (cGy, u k = 1)", "measured / estimated"};

sl_status sl_report_invivo_html(FILE *fp, const sl_invivo_report *r, sl_error *err)
{
    const sl_log_readings *rs = r->readings;
    const sl_invivo_stats *s = r->stats;
    hdoc h;
    if (!hdoc_new(&h, "strayline: in-vivo readings against screening estimates", sl_report_css))
        return sl_error_set(err, SL_ENOMEM, "out of memory building the HTML report");
    xmlNodePtr b = h.body;
    hel(&h, b, "h1", "In-vivo readings against screening estimates");
    xmlNodePtr c = hel(&h, b, "p", caution);
    hattr(&h, c, "class", "caution");
    helf(&h, b, "p", "Log %s; %zu reading%s%s%s%s%s. strayline %s.", r->log_path, rs->n,
         rs->n == 1 ? "" : "s", rs->n ? " measured " : "", rs->n ? s->first_date : "",
         rs->n ? " to " : "", rs->n ? s->last_date : "", sl_version());
    if (r->model)
        helf(&h, b, "p", "Distance bands: the transfer-uncertainty bands of model %s (version %s).",
             r->model->source ? r->model->source : "-", r->model->model_version);
    else
        hel(&h, b, "p", "Distance bands: strayline's built-in transfer-uncertainty bands.");
    hel(&h, b, "h2", "By machine, energy, applicator and distance band");
    xmlNodePtr t = hel(&h, b, "table", NULL);
    hrow(&h, t, true, group_head, 9);
    for (size_t i = 0; i < s->ngroups; i++) {
        char cells[9][96];
        group_cells(&s->groups[i], cells);
        const char *cp[9];
        for (int k = 0; k < 9; k++)
            cp[k] = cells[k];
        hrow(&h, t, false, cp, 9);
    }
    hel(&h, b, "h2", "Measured / estimated against the distance from the field edge");
    fig_svg_into(&h, b, 560, 340, fig_invivo_ratio, rs);
    hel(&h, b, "h2", "Readings");
    t = hel(&h, b, "table", NULL);
    hrow(&h, t, true, reading_head, 8);
    for (size_t i = 0; i < rs->n; i++) {
        char cells[8][160];
        reading_cells(&rs->r[i], cells);
        const char *cp[8];
        for (int k = 0; k < 8; k++)
            cp[k] = cells[k];
        xmlNodePtr row = hrow(&h, t, false, cp, 8);
        if (rs->r[i].flagged) {
            hattr(&h, row, "class", "status-exceeds");
            if (rs->r[i].check)
                helf(&h, b, "p", "%s: %s", rs->r[i].reading_id, rs->r[i].check);
        }
    }
    if (h.failed) {
        hdoc_free(&h);
        return sl_error_set(err, SL_ENOMEM, "out of memory building the HTML report");
    }
    return hdoc_write(&h, fp, err);
}

/* -------------------------------------------------------------- PDF -- */

static void compose(pdoc *d, const sl_invivo_report *r, const char *date)
{
    const sl_log_readings *rs = r->readings;
    const sl_invivo_stats *s = r->stats;
    char line[1400];
    pdoc_heading(d, "In-vivo readings against screening estimates", 15);
    pdoc_banner(d, caution, 9, 1.2, 1, 1, 1, false);
    snprintf(line, sizeof line, "Log %s; %zu reading%s%s%s%s%s. Report %s, strayline %s.",
             r->log_path, rs->n, rs->n == 1 ? "" : "s", rs->n ? " measured " : "",
             rs->n ? s->first_date : "", rs->n ? " to " : "", rs->n ? s->last_date : "", date,
             sl_version());
    pdoc_para(d, line, 9, false);
    static const double gw[] = {0.1, 0.13, 0.11, 0.04, 0.16, 0.16, 0.1, 0.14, 0.06};
    ptable gt = {9, gw, group_head, 7.5};
    pdoc_heading(d, "By machine, energy, applicator and distance band", 11);
    pdoc_table_head(d, &gt);
    for (size_t i = 0; i < s->ngroups; i++) {
        char cells[9][96];
        group_cells(&s->groups[i], cells);
        const char *cp[9];
        for (int k = 0; k < 9; k++)
            cp[k] = cells[k];
        pdoc_table_row(d, &gt, cp, NULL, false);
    }
    pdoc_skip(d, 6);
    pdoc_heading(d, "Measured / estimated against the distance from the field edge", 11);
    double fw = d->w - d->left - d->right;
    pdoc_figure(d, fw, fw * 0.6, fig_invivo_ratio, rs);
    pdoc_heading(d, "Readings", 11);
    static const double rw[] = {0.09, 0.09, 0.11, 0.27, 0.08, 0.13, 0.12, 0.11};
    ptable rt = {8, rw, reading_head, 7.5};
    pdoc_table_head(d, &rt);
    static const double red[3] = {1, 0.85, 0.85};
    for (size_t i = 0; i < rs->n; i++) {
        char cells[8][160];
        reading_cells(&rs->r[i], cells);
        const char *cp[8];
        for (int k = 0; k < 8; k++)
            cp[k] = cells[k];
        pdoc_table_row(d, &rt, cp, rs->r[i].flagged ? red : NULL, false);
    }
    for (size_t i = 0; i < rs->n; i++)
        if (rs->r[i].flagged && rs->r[i].check) {
            snprintf(line, sizeof line, "%s: %s", rs->r[i].reading_id, rs->r[i].check);
            pdoc_para(d, line, 8, false);
        }
}

typedef struct compose_ctx {
    const sl_invivo_report *r;
    const char *date;
} compose_ctx;

static void compose_pass(pdoc *d, const void *ctx)
{
    const compose_ctx *c = ctx;
    compose(d, c->r, c->date);
}

sl_status sl_report_invivo_pdf(const sl_invivo_report *r, const char *paper,
                               unsigned char **pdf, size_t *len, sl_error *err)
{
    *pdf = NULL;
    *len = 0;
    char date[32];
    time_t now = time(NULL);
    struct tm tmv;
    if (!localtime_r(&now, &tmv) || !strftime(date, sizeof date, "%Y-%m-%d %H:%M", &tmv))
        snprintf(date, sizeof date, "-");
    pdoc d;
    memset(&d, 0, sizeof d);
    snprintf(d.head_left, sizeof d.head_left, "strayline in-vivo readings: SCREENING ESTIMATES");
    snprintf(d.head_right, sizeof d.head_right, "log %s", r->log_path);
    snprintf(d.foot_left, sizeof d.foot_left, "report %s", date);
    compose_ctx c = {r, date};
    return pdoc_render(&d, paper, compose_pass, &c, pdf, len, err);
}
