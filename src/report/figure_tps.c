/*
 * The comparison figure of `estimate --tps-dose` (see figure.h): the ratio
 * model / planning system of the course dose against the distance from the
 * nearest field edge, in the 1 cm bins of the dose stage's band, one series
 * for every beam together and one for each beam a BEAM dose covers alone.
 * Each bin shows its mean as a marker and its smallest and largest ratio as
 * a bar; a line marks where the two agree (ratio 1) and another the seam.
 *
 * It is the clinic's own picture of where its planning system stops being
 * trustworthy out of field, so it draws exactly the rows of the table
 * beside it (e->ratios) and nothing interpolated between them.
 */
#include "figure.h"

#include <math.h>
#include <stdio.h>
#include <string.h>

/* Series colours: every beam together first (dark), then one per beam; a
 * marker shape a series too, so no series is told by colour alone. */
static const double series_rgb[][3] = {
    {0.10, 0.10, 0.10}, {0.11, 0.37, 0.62}, {0.70, 0.15, 0.12},
    {0.13, 0.50, 0.22}, {0.55, 0.30, 0.65}, {0.80, 0.50, 0.05},
};
#define NSERIES_RGB (sizeof series_rgb / sizeof *series_rgb)

static void marker(cairo_t *cr, size_t s, double x, double y, double r)
{
    switch (s % 4) {
    case 0: /* a disc: its own closed subpath, as every filled shape */
        cairo_new_sub_path(cr);
        cairo_arc(cr, x, y, r, 0, 2 * M_PI);
        cairo_close_path(cr);
        break;
    case 1: cairo_rectangle(cr, x - r, y - r, 2 * r, 2 * r); break;
    case 2:
        cairo_move_to(cr, x, y - r * 1.2);
        cairo_line_to(cr, x + r * 1.1, y + r * 0.8);
        cairo_line_to(cr, x - r * 1.1, y + r * 0.8);
        cairo_close_path(cr);
        break;
    default:
        cairo_move_to(cr, x, y - r * 1.2);
        cairo_line_to(cr, x + r * 1.2, y);
        cairo_line_to(cr, x, y + r * 1.2);
        cairo_line_to(cr, x - r * 1.2, y);
        cairo_close_path(cr);
    }
    cairo_fill(cr);
}

static void draw_tps_ratio(cairo_t *cr, double w, double h, const void *vctx)
{
    const fig_tps_ctx *ctx = vctx;
    const sl_estimate *e = ctx->r->est;
    double fs = fmin(fmax(fmin(w, h) / 40, 6.5), 9);
    fig_font f = {fs, false, false}, fb = {fs * 1.1, true, false};
    cairo_set_source_rgb(cr, 0.1, 0.1, 0.1);
    const char *title = "Model / planning system (course dose) against the distance from the "
                        "nearest field edge";
    double tw, th;
    fig_text_size(cr, title, fb, w, &tw, &th);
    fig_text(cr, 0, 0, 0, 0, title, fb, w);
    if (!e->tps_used || e->nratios == 0) {
        fig_text(cr, 0, th + fs, 0, 0,
                 "no organ sample lies in the comparison band with both doses", f, w);
        return;
    }
    /* the series: beam numbers in the order of the table (0 first) */
    int series[64];
    size_t ns = 0;
    double lo = 1, hi = 1;
    bool positive = true;
    for (size_t k = 0; k < e->nratios; k++) {
        const sl_tps_ratio *t = &e->ratios[k];
        bool seen = false;
        for (size_t s = 0; s < ns; s++)
            seen = seen || series[s] == t->beam_number;
        if (!seen && ns < sizeof series / sizeof *series)
            series[ns++] = t->beam_number;
        lo = fmin(lo, t->min);
        hi = fmax(hi, t->max);
        positive = positive && t->min > 0;
    }
    /* a ratio that spans more than a factor of five reads better on a log axis */
    bool logy = positive && hi / lo > 5;
    double y0, y1;
    if (logy) {
        fig_log_range(lo, hi, &y0, &y1);
    } else {
        double pad = 0.08 * (hi - lo > 0 ? hi - lo : 1);
        y0 = fmax(0, lo - pad);
        y1 = hi + pad;
    }
    double legend_h = fs * 1.6;
    fig_axes ax = {fs * 5.2, th + fs * 0.8 + legend_h, 0, 0, 0, SL_TPS_BAND_CM, y0, y1, logy};
    ax.w = w - ax.x - fs * 1.5;
    ax.h = h - ax.y - fs * 3.4;
    if (ax.h < 20 || ax.w < 20)
        return;
    fig_axes_draw(cr, &ax, "distance from the nearest field edge (cm)",
                  "model / planning system", true, true, fs);
    /* the legend, one line above the plot */
    double lx = ax.x, ly = th + fs * 0.8 + legend_h / 2;
    for (size_t s = 0; s < ns; s++) {
        char name[32];
        if (series[s])
            snprintf(name, sizeof name, "beam %d", series[s]);
        else
            snprintf(name, sizeof name, "every beam together");
        const double *c = series_rgb[s % NSERIES_RGB];
        cairo_set_source_rgb(cr, c[0], c[1], c[2]);
        marker(cr, s, lx + fs * 0.4, ly, fs * 0.35);
        double nw, nh;
        fig_text_size(cr, name, f, 0, &nw, &nh);
        cairo_set_source_rgb(cr, 0.1, 0.1, 0.1);
        fig_text(cr, lx + fs * 1.1, ly, 0, 0.5, name, f, 0);
        lx += fs * 2.2 + nw;
    }
    cairo_save(cr);
    cairo_rectangle(cr, ax.x, ax.y, ax.h > 0 ? ax.w : 0, ax.h);
    cairo_clip(cr);
    /* agreement (ratio 1) and the seam */
    double dsh[2] = {5, 3};
    cairo_set_dash(cr, dsh, 2, 0);
    cairo_set_line_width(cr, 1);
    cairo_set_source_rgb(cr, 0.35, 0.35, 0.35);
    cairo_move_to(cr, ax.x, fig_ax_y(&ax, 1));
    cairo_line_to(cr, ax.x + ax.w, fig_ax_y(&ax, 1));
    cairo_stroke(cr);
    double sx = fig_ax_x(&ax, e->tps_zone_cm);
    cairo_set_source_rgb(cr, 0.55, 0.05, 0.10);
    cairo_move_to(cr, sx, ax.y);
    cairo_line_to(cr, sx, ax.y + ax.h);
    cairo_stroke(cr);
    cairo_set_dash(cr, NULL, 0, 0);
    /* the label above its line, or below it when the line runs along the top */
    double y1px = fig_ax_y(&ax, 1);
    bool below = y1px - ax.y < fs * 1.5;
    fig_text(cr, ax.x + ax.w - 2, below ? y1px + 2 : y1px - 2, 1, below ? 0 : 1,
             "model = planning system", (fig_font){fs * 0.9, false, false}, 0);
    char seam[64];
    snprintf(seam, sizeof seam, "seam %.1f cm", e->tps_zone_cm);
    fig_text(cr, sx + 2, ax.y + 2, 0, 0, seam, (fig_font){fs * 0.9, false, false}, 0);
    /* the bins: series side by side within each bin */
    double bw = SL_TPS_BAND_CM / SL_TPS_BINS;
    size_t drawn = 0;
    for (size_t k = 0; k < e->nratios; k++) {
        const sl_tps_ratio *t = &e->ratios[k];
        size_t s = 0;
        while (s < ns && series[s] != t->beam_number)
            s++;
        if (s == ns || !isfinite(t->mean))
            continue;
        double off = ns > 1 ? (((double)s + 0.5) / (double)ns - 0.5) * bw * 0.6 : 0;
        double px = fig_ax_x(&ax, 0.5 * (t->lo_cm + t->hi_cm) + off);
        const double *c = series_rgb[s % NSERIES_RGB];
        cairo_set_source_rgb(cr, c[0], c[1], c[2]);
        cairo_set_line_width(cr, 1.2);
        cairo_move_to(cr, px, fig_ax_y(&ax, fmax(t->min, y0)));
        cairo_line_to(cr, px, fig_ax_y(&ax, t->max));
        cairo_stroke(cr);
        marker(cr, s, px, fig_ax_y(&ax, t->mean), fs * 0.4);
        drawn++;
    }
    cairo_restore(cr);
    fig_count(cr, "bins", "%zu", drawn);
    fig_count(cr, "rows", "%zu", e->nratios);
}

void fig_tps_ratio(cairo_t *cr, double w, double h, const void *ctx)
{
    fig_boxed(cr, w, h, draw_tps_ratio, ctx);
}
