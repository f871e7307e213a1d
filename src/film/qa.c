/*
 * The film module's pages: the calibration report and a QA page a film.
 *
 * Pages are libxml2 HTML trees (the report module's helpers); figures are
 * drawn with cairo (text laid out by Pango) into PNG images carried in the
 * page as data: URIs (base64 by nettle), so each page is one self-contained
 * file. A reader checks with them what the numbers cannot show: that the
 * curve passes through its points, that the field found is the field, that
 * the band sampled lies where it should, that merged films join.
 */
#include "film_internal.h"

#include "../report/html.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

#include <cairo-pdf.h>
#include <cairo.h>
#include <nettle/base64.h>
#include <pango/pangocairo.h>

#define LN10 2.302585092994046

char *sl_film_png_uri(const unsigned char *png, size_t n)
{
    static const char head[] = "data:image/png;base64,";
    size_t len = BASE64_ENCODE_RAW_LENGTH(n);
    char *s = malloc(sizeof head + len);
    if (!s)
        return NULL;
    memcpy(s, head, sizeof head - 1);
    base64_encode_raw(s + sizeof head - 1, n, png);
    s[sizeof head - 1 + len] = '\0';
    return s;
}

static cairo_status_t png_write(void *closure, const unsigned char *data, unsigned int length)
{
    sl_buf *b = closure;
    sl_buf_append(b, (const char *)data, length);
    return b->failed ? CAIRO_STATUS_NO_MEMORY : CAIRO_STATUS_SUCCESS;
}

/* Put a surface into the page as <img>; false on failure. */
static bool put_image(hdoc *h, xmlNodePtr parent, cairo_surface_t *sf, const char *alt)
{
    sl_buf b = {0};
    bool ok = cairo_surface_write_to_png_stream(sf, png_write, &b) == CAIRO_STATUS_SUCCESS;
    char *uri = ok ? sl_film_png_uri((const unsigned char *)b.data, b.len) : NULL;
    sl_buf_free(&b);
    if (!uri)
        return false;
    xmlNodePtr img = hel(h, parent, "img", NULL);
    hattr(h, img, "src", uri);
    hattr(h, img, "alt", alt);
    hattrf(h, img, "width", "%d", cairo_image_surface_get_width(sf));
    free(uri);
    return true;
}

static void text(cairo_t *cr, double x, double y, const char *s, double ax, double ay,
                 bool vertical)
{
    PangoLayout *lay = pango_cairo_create_layout(cr);
    PangoFontDescription *fd = pango_font_description_from_string("DejaVu Sans 8");
    pango_layout_set_font_description(lay, fd);
    pango_font_description_free(fd);
    pango_layout_set_text(lay, s, -1);
    int w, hh;
    pango_layout_get_pixel_size(lay, &w, &hh);
    cairo_save(cr);
    cairo_translate(cr, x, y);
    if (vertical)
        cairo_rotate(cr, -M_PI / 2);
    cairo_move_to(cr, -ax * w, -ay * hh);
    pango_cairo_show_layout(cr, lay);
    cairo_restore(cr);
    g_object_unref(lay);
}

typedef struct cplot {
    cairo_surface_t *sf; /* NULL when drawing on a page (canvas) */
    cairo_t *cr;
    double w, h, l, r, t, b;
    double x0, x1, y0, y1;
    bool logy;
} cplot;

/* Where a plot goes when not to its own PNG: a place on a PDF page. */
typedef struct canvas {
    cairo_t *cr;
    double x, y, scale;
} canvas;

static double X(const cplot *p, double x)
{
    return p->l + (x - p->x0) / (p->x1 - p->x0) * (p->w - p->l - p->r);
}

static double Y(const cplot *p, double y)
{
    double f = p->logy ? (log10(fmax(y, 1e-300)) - log10(p->y0)) / (log10(p->y1) - log10(p->y0))
                       : (y - p->y0) / (p->y1 - p->y0);
    return p->h - p->b - f * (p->h - p->t - p->b);
}

static double nice_step(double span)
{
    double s = pow(10, floor(log10(span / 5)));
    if (span / s > 12)
        s *= 2.5;
    if (span / s > 12)
        s *= 2;
    return s;
}

static bool plot_begin(cplot *p, const canvas *cv, double w, double h, double x0, double x1,
                       double y0, double y1, bool logy, const char *xl, const char *yl,
                       const char *title)
{
    memset(p, 0, sizeof *p);
    if (!(x1 > x0)) {
        x0 -= 1;
        x1 += 1;
    }
    if (logy) {
        y0 = pow(10, floor(log10(fmax(y0, 1e-6))));
        y1 = pow(10, ceil(log10(fmax(y1, y0 * 10))));
    } else if (!(y1 > y0)) {
        y0 -= 1;
        y1 += 1;
    }
    *p = (cplot){NULL, NULL, w, h, 58, 14, 24, 40, x0, x1, y0, y1, logy};
    if (cv) {
        p->cr = cv->cr;
        cairo_save(p->cr);
        cairo_translate(p->cr, cv->x, cv->y);
        cairo_scale(p->cr, cv->scale, cv->scale);
    } else {
        p->sf = cairo_image_surface_create(CAIRO_FORMAT_RGB24, (int)w, (int)h);
        p->cr = cairo_create(p->sf);
        if (cairo_status(p->cr) != CAIRO_STATUS_SUCCESS)
            return false;
    }
    cairo_t *cr = p->cr;
    cairo_set_source_rgb(cr, 1, 1, 1);
    cairo_rectangle(cr, 0, 0, w, h);
    cairo_fill(cr);
    cairo_set_line_width(cr, 1);
    /* grid and ticks */
    char buf[32];
    if (logy) {
        for (double v = y0; v <= y1 * 1.0001; v *= 10) {
            cairo_set_source_rgb(cr, 0.85, 0.85, 0.85);
            cairo_move_to(cr, p->l, Y(p, v));
            cairo_line_to(cr, w - p->r, Y(p, v));
            cairo_stroke(cr);
            cairo_set_source_rgb(cr, 0, 0, 0);
            snprintf(buf, sizeof buf, "%g", v);
            text(cr, p->l - 4, Y(p, v), buf, 1, 0.5, false);
        }
    } else {
        double s = nice_step(y1 - y0);
        for (double v = ceil(y0 / s) * s; v <= y1 + 1e-9 * s; v += s) {
            cairo_set_source_rgb(cr, 0.85, 0.85, 0.85);
            cairo_move_to(cr, p->l, Y(p, v));
            cairo_line_to(cr, w - p->r, Y(p, v));
            cairo_stroke(cr);
            cairo_set_source_rgb(cr, 0, 0, 0);
            snprintf(buf, sizeof buf, "%g", fabs(v) < 1e-12 * s ? 0.0 : v);
            text(cr, p->l - 4, Y(p, v), buf, 1, 0.5, false);
        }
    }
    double s = nice_step(x1 - x0);
    for (double v = ceil(x0 / s) * s; v <= x1 + 1e-9 * s; v += s) {
        cairo_set_source_rgb(cr, 0.85, 0.85, 0.85);
        cairo_move_to(cr, X(p, v), p->t);
        cairo_line_to(cr, X(p, v), h - p->b);
        cairo_stroke(cr);
        cairo_set_source_rgb(cr, 0, 0, 0);
        snprintf(buf, sizeof buf, "%g", fabs(v) < 1e-12 * s ? 0.0 : v);
        text(cr, X(p, v), h - p->b + 3, buf, 0.5, 0, false);
    }
    cairo_set_source_rgb(cr, 0, 0, 0);
    cairo_rectangle(cr, p->l, p->t, w - p->l - p->r, h - p->t - p->b);
    cairo_stroke(cr);
    text(cr, (p->l + w - p->r) / 2, h - 14, xl, 0.5, 0, false);
    text(cr, 12, (p->t + h - p->b) / 2, yl, 0.5, 0.5, true);
    text(cr, p->l, 4, title, 0, 0, false);
    cairo_rectangle(cr, p->l, p->t, w - p->l - p->r, h - p->t - p->b);
    cairo_clip(cr);
    return true;
}

static void plot_end(cplot *p)
{
    if (p->cr && !p->sf)
        cairo_restore(p->cr);
    else if (p->cr)
        cairo_destroy(p->cr);
    if (p->sf)
        cairo_surface_destroy(p->sf);
    p->cr = NULL;
    p->sf = NULL;
}

static void plot_curve(cplot *p, const double *x, const double *y, size_t n, double r, double g,
                       double b, bool dashed)
{
    cairo_t *cr = p->cr;
    cairo_set_source_rgb(cr, r, g, b);
    cairo_set_line_width(cr, 1.6);
    double d[] = {5, 3};
    cairo_set_dash(cr, d, dashed ? 2 : 0, 0);
    bool pen = false;
    for (size_t i = 0; i < n; i++) {
        if (!isfinite(x[i]) || !isfinite(y[i]) || (p->logy && y[i] <= 0)) {
            pen = false;
            continue;
        }
        if (pen)
            cairo_line_to(cr, X(p, x[i]), Y(p, y[i]));
        else
            cairo_move_to(cr, X(p, x[i]), Y(p, y[i]));
        pen = true;
    }
    cairo_stroke(cr);
    cairo_set_dash(cr, d, 0, 0);
}

static void plot_points(cplot *p, const double *x, const double *y, const double *e, size_t n,
                        double r, double g, double b)
{
    cairo_t *cr = p->cr;
    cairo_set_source_rgb(cr, r, g, b);
    cairo_set_line_width(cr, 0.8);
    for (size_t i = 0; i < n; i++) {
        if (!isfinite(x[i]) || !isfinite(y[i]) || (p->logy && y[i] <= 0))
            continue;
        if (e && isfinite(e[i]) && e[i] > 0) {
            double lo = y[i] - e[i];
            if (p->logy && lo <= 0)
                lo = y[i] / 100;
            cairo_move_to(cr, X(p, x[i]), Y(p, lo));
            cairo_line_to(cr, X(p, x[i]), Y(p, y[i] + e[i]));
            cairo_stroke(cr);
        }
        cairo_arc(cr, X(p, x[i]), Y(p, y[i]), 2.2, 0, 2 * M_PI);
        cairo_fill(cr);
    }
}

static void plot_hline(cplot *p, double y, double r, double g, double b)
{
    cairo_set_source_rgb(p->cr, r, g, b);
    cairo_set_line_width(p->cr, 1);
    double d[] = {4, 3};
    cairo_set_dash(p->cr, d, 2, 0);
    cairo_move_to(p->cr, p->l, Y(p, y));
    cairo_line_to(p->cr, p->w - p->r, Y(p, y));
    cairo_stroke(p->cr);
    cairo_set_dash(p->cr, d, 0, 0);
}

static void caution(hdoc *h, const char *notice)
{
    xmlNodePtr c = hel(h, h->body, "div", NULL);
    hattr(h, c, "class", "caution");
    if (notice) {
        xmlNodePtr p = hel(h, c, "p", notice);
        hattr(h, p, "class", "notice");
    }
    hel(h, c, "p",
        "Film dosimetry for commissioning measurements. The numbers are only as good as the "
        "scans, the calibration doses and the handling of the film: check them against an "
        "independent measurement, follow local protocols and have a qualified medical "
        "physicist review them before any model built from them is used.");
}

static void ncell(hdoc *h, xmlNodePtr tr, const char *fmt, double v)
{
    xmlNodePtr td = isfinite(v) ? helf(h, tr, "td", fmt, v) : hel(h, tr, "td", "-");
    hattr(h, td, "class", "n");
}

/* ------------------------------------------------ calibration report -- */

/* The three figures of a channel: into the page's grid as PNG, or onto a PDF page from
 * `top` down. */
static bool channel_figures(const sl_film_curve *c, const sl_film_channel *ch, hdoc *h,
                        xmlNodePtr grid, cairo_t *pdf, double top)
{
    bool ok = true;
    /* the curve with its points */
    double xs[201], yc[2][201];
    double xlo = 0;
    for (size_t k = 0; k < ch->npoints; k++)
        xlo = fmin(xlo, ch->points[k].netod);
    for (int k = 0; k <= 200; k++) {
        xs[k] = xlo + (ch->max_netod * 1.02 - xlo) * k / 200.0;
        for (int f = 0; f < 2; f++)
            yc[f][k] = ch->forms[f].ok ? sl_film_form_eval((sl_film_form)f, ch->forms[f].theta,
                                                           xs[k], NULL)
                                       : NAN;
    }
    size_t np = ch->npoints;
    double *px = malloc(np * sizeof *px), *py = malloc(np * sizeof *py),
           *pe = malloc(np * sizeof *pe), *pr = malloc(np * sizeof *pr);
    if (!px || !py || !pe || !pr) {
        free(px);
        free(py);
        free(pe);
        free(pr);
        return false;
    }
    double rmax = 1;
    for (size_t k = 0; k < np; k++) {
        px[k] = ch->points[k].netod;
        py[k] = ch->points[k].dose_cgy;
        pe[k] = ch->points[k].dose_sigma_cgy;
        double fv = sl_film_form_eval((sl_film_form)ch->chosen, ch->forms[ch->chosen].theta,
                                      px[k], NULL);
        pr[k] = py[k] - fv;
        rmax = fmax(rmax, fabs(pr[k]) * 1.2);
    }
    cplot p = {0};
    char title[128];
    snprintf(title, sizeof title, "%s: dose against netOD (solid: chosen, dashed: other)",
             sl_film_channel_name(ch->channel));
    if (plot_begin(&p, pdf ? &(canvas){pdf, 90, top, 0.75} : NULL, 420, 300, xlo, ch->max_netod * 1.05, 0, ch->max_dose_cgy * 1.08,
                   false, "net optical density", "dose (cGy)", title)) {
        for (int f = 0; f < 2; f++)
            if (ch->forms[f].ok)
                plot_curve(&p, xs, yc[f], 201, 0.1, 0.37, 0.62, f != ch->chosen);
        plot_points(&p, px, py, NULL, np, 0.7, 0.15, 0.12);
        if (!pdf) {
            cairo_surface_flush(p.sf);
            ok = ok && put_image(h, grid, p.sf, title);
        }
    }
    plot_end(&p);
    snprintf(title, sizeof title, "%s: residuals of the chosen form (bars: 1 sigma)",
             sl_film_channel_name(ch->channel));
    if (plot_begin(&p, pdf ? &(canvas){pdf, 90, top + 235, 0.75} : NULL, 420, 300, 0, ch->max_dose_cgy * 1.05, -rmax, rmax, false,
                   "dose given (cGy)", "given - curve (cGy)", title)) {
        plot_hline(&p, 0, 0.3, 0.3, 0.3);
        plot_points(&p, py, pr, pe, np, 0.7, 0.15, 0.12);
        if (!pdf) {
            cairo_surface_flush(p.sf);
            ok = ok && put_image(h, grid, p.sf, title);
        }
    }
    plot_end(&p);
    /* dose uncertainty against dose, for a reading of the stated area */
    double m = c->reading_area_cm2 / (c->pixel_cm * c->pixel_cm);
    double sd = ch->pixel_rel_sd / LN10 / sqrt(m);
    double ud[200], ur[200];
    size_t nu = 0;
    for (int k = 1; k <= 200; k++) {
        double x = ch->max_netod * k / 200.0, sg;
        double d = sl_film_dose(ch, x, sd, &sg);
        if (isfinite(d) && d > 0) {
            ud[nu] = d;
            ur[nu++] = 100 * sg / d;
        }
    }
    snprintf(title, sizeof title, "%s: relative standard uncertainty of a %g cm2 reading",
             sl_film_channel_name(ch->channel), c->reading_area_cm2);
    double umax = 1, dmin = ch->max_dose_cgy;
    for (size_t k = 0; k < nu; k++) {
        umax = fmax(umax, ur[k]);
        dmin = fmin(dmin, ud[k]);
    }
    if (nu && plot_begin(&p, pdf ? &(canvas){pdf, 90, top + 470, 0.75} : NULL, 420, 300, 0, ch->max_dose_cgy, 0.1, umax, true, "dose (cGy)",
                         "uncertainty (% of the dose)", title)) {
        plot_curve(&p, ud, ur, nu, 0.1, 0.37, 0.62, false);
        plot_hline(&p, 100 * c->resolve_fraction, 0.7, 0.15, 0.12);
        if (!pdf) {
            cairo_surface_flush(p.sf);
            ok = ok && put_image(h, grid, p.sf, title);
        }
    }
    plot_end(&p);
    free(px);
    free(py);
    free(pe);
    free(pr);
    return ok;
}

sl_status sl_film_curve_report(const sl_film_curve *c, FILE *fp, sl_error *err)
{
    hdoc h;
    if (!hdoc_new(&h, "strayline film calibration", sl_report_css))
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    hel(&h, h.body, "h1", "Film calibration");
    caution(&h, c->notice);
    xmlNodePtr t = hel(&h, h.body, "table", NULL);
    const char *rows[][2] = {
        {"calibration set", c->source}, {"SHA-256", c->sha256},
        {"film lot", c->lot},           {"film", c->film ? c->film : "-"},
        {"scanner", c->scanner},        {"scan settings", c->scan_settings ? c->scan_settings : "-"},
        {"exposed", c->exposed ? c->exposed : "-"}, {"scanned", c->scanned},
        {"created", c->created},        {"strayline", c->tool_version},
        {"channel used", sl_film_channel_name(c->channel)},
    };
    for (size_t i = 0; i < sizeof rows / sizeof rows[0]; i++)
        hrow(&h, t, false, rows[i], 2);
    helf(&h, h.body, "p",
         "Net optical density netOD = log10(PV0 / PV), PV0 the robust mean pixel value of the "
         "unexposed pieces (AAPM TG-235). Forms: power D = a netOD + b netOD^n (Devic et al. "
         "2004); rational D = c + b / (10^-netOD - a) (the scanner response of Lewis et al. "
         "2012). The lower AICc wins. Lowest resolvable dose: where the standard uncertainty of "
         "a reading of %g cm2 is %g times the dose.",
         c->reading_area_cm2, c->resolve_fraction);
    if (c->notes.count) {
        hel(&h, h.body, "h2", "Warnings");
        xmlNodePtr ul = hel(&h, h.body, "ul", NULL);
        for (size_t i = 0; i < c->notes.count; i++)
            hel(&h, ul, "li", c->notes.items[i]);
    }
    for (int i = 0; i < c->nchannels; i++) {
        const sl_film_channel *ch = &c->ch[i];
        helf(&h, h.body, "h2", "The %s channel%s", sl_film_channel_name(ch->channel),
             ch->channel == c->channel ? " (used)" : "");
        if (ch->chosen < 0) {
            hel(&h, h.body, "p", "Not fitted (see the warnings).");
            continue;
        }
        helf(&h, h.body, "p",
             "PV0 = %.1f (standard error %.2f), pixel standard deviation %.2f %% of PV0; scatter "
             "of the pieces about the curve beyond their noise: netOD %.2g. Chosen: the %s form. "
             "Lowest resolvable dose: %s.",
             ch->pv0, ch->pv0_sem, 100 * ch->pixel_rel_sd, ch->netod_scatter,
             sl_film_form_name((sl_film_form)ch->chosen),
             isfinite(ch->lowest_dose_cgy) ? "see below" : "none in the calibrated range");
        if (isfinite(ch->lowest_dose_cgy))
            helf(&h, h.body, "p", "Lowest resolvable dose: %.3g cGy.", ch->lowest_dose_cgy);
        xmlNodePtr ft = hel(&h, h.body, "table", NULL);
        const char *fh[] = {"form", "a", "b", "n or c", "chi-square", "AICc", "chosen"};
        hrow(&h, ft, true, fh, 7);
        for (int f = 0; f < SL_FILM_NFORMS; f++) {
            const sl_film_formfit *ff = &ch->forms[f];
            xmlNodePtr tr = hel(&h, ft, "tr", NULL);
            hel(&h, tr, "td", sl_film_form_name((sl_film_form)f));
            if (!ff->ok) {
                xmlNodePtr td = hel(&h, tr, "td", ff->why);
                hattr(&h, td, "colspan", "6");
                continue;
            }
            for (int k = 0; k < 3; k++)
                helf(&h, tr, "td", "%.5g +- %.2g", ff->theta[k], sqrt(ff->covar[k * 4]));
            ncell(&h, tr, "%.4g", ff->chisq);
            ncell(&h, tr, "%.4g", ff->aicc);
            hel(&h, tr, "td", f == ch->chosen ? "yes" : "");
        }
        xmlNodePtr grid = hel(&h, h.body, "div", NULL);
        hattr(&h, grid, "class", "grid");
        if (!channel_figures(c, ch, &h, grid, NULL, 0)) {
            hdoc_free(&h);
            return sl_error_set(err, SL_ENOMEM, "out of memory");
        }
        size_t np = ch->npoints;
        xmlNodePtr pt = hel(&h, h.body, "table", NULL);
        const char *ph[] = {"piece", "dose (cGy)", "pixel value", "netOD", "netOD sigma",
                            "weight sigma (cGy)", "curve (cGy)", "check"};
        hrow(&h, pt, true, ph, 8);
        for (size_t k = 0; k < np; k++) {
            const sl_film_point *q = &ch->points[k];
            xmlNodePtr tr = hel(&h, pt, "tr", NULL);
            helf(&h, tr, "td", "%zu", q->piece + 1);
            ncell(&h, tr, "%g", q->dose_cgy);
            ncell(&h, tr, "%.1f", c->pieces[q->piece].stats[i].mean);
            ncell(&h, tr, "%.5f", q->netod);
            ncell(&h, tr, "%.2g", q->netod_sigma);
            ncell(&h, tr, "%.3g", q->dose_sigma_cgy);
            double sg, d = sl_film_dose(ch, q->netod, q->netod_sigma, &sg);
            if (isfinite(d))
                helf(&h, tr, "td", "%.4g +- %.2g", d, sg);
            else
                hel(&h, tr, "td", "beyond the range");
            hel(&h, tr, "td", q->held_out ? "held out" : "");
        }
    }
    return hdoc_write(&h, fp, err);
}

static cairo_status_t file_write(void *closure, const unsigned char *data, unsigned int n)
{
    return fwrite(data, 1, n, closure) == n ? CAIRO_STATUS_SUCCESS : CAIRO_STATUS_WRITE_ERROR;
}

/* A paragraph wrapped to width w from (x, y); returns the y below it. */
static double para(cairo_t *cr, double x, double y, double w, const char *text, const char *font)
{
    PangoLayout *lay = pango_cairo_create_layout(cr);
    PangoFontDescription *fd = pango_font_description_from_string(font);
    pango_layout_set_font_description(lay, fd);
    pango_font_description_free(fd);
    pango_layout_set_width(lay, (int)(w * PANGO_SCALE));
    pango_layout_set_wrap(lay, PANGO_WRAP_WORD_CHAR);
    pango_layout_set_text(lay, text, -1);
    cairo_set_source_rgb(cr, 0, 0, 0);
    cairo_move_to(cr, x, y);
    pango_cairo_show_layout(cr, lay);
    int pw, ph;
    pango_layout_get_pixel_size(lay, &pw, &ph);
    g_object_unref(lay);
    return y + ph + 4;
}

sl_status sl_film_curve_report_pdf(const sl_film_curve *c, FILE *fp, sl_error *err)
{
    /* A4 in points */
    cairo_surface_t *sf = cairo_pdf_surface_create_for_stream(file_write, fp, 595.276, 841.89);
    cairo_t *cr = cairo_create(sf);
    const double x = 50, w = 495;
    char line[1024];
    double y = para(cr, x, 40, w, "Film calibration", "DejaVu Sans Bold 15");
    if (c->notice)
        y = para(cr, x, y, w, c->notice, "DejaVu Sans Bold 9");
    y = para(cr, x, y + 4, w,
             "Film dosimetry for commissioning measurements. The numbers are only as good as the "
             "scans, the calibration doses and the handling of the film: check them against an "
             "independent measurement, follow local protocols and have a qualified medical "
             "physicist review them before any model built from them is used.",
             "DejaVu Sans 9");
    const char *rows[][2] = {
        {"calibration set", c->source}, {"SHA-256", c->sha256},
        {"film lot", c->lot},           {"film", c->film ? c->film : "-"},
        {"scanner", c->scanner},        {"scan settings", c->scan_settings ? c->scan_settings : "-"},
        {"exposed", c->exposed ? c->exposed : "-"}, {"scanned", c->scanned},
        {"created", c->created},        {"strayline", c->tool_version},
        {"channel used", sl_film_channel_name(c->channel)},
    };
    y += 6;
    for (size_t i = 0; i < sizeof rows / sizeof rows[0]; i++) {
        snprintf(line, sizeof line, "%s: %s", rows[i][0], rows[i][1]);
        y = para(cr, x, y, w, line, "DejaVu Sans 9");
    }
    snprintf(line, sizeof line,
             "Net optical density netOD = log10(PV0 / PV), PV0 the robust mean pixel value of the "
             "unexposed pieces (AAPM TG-235). Forms: power D = a netOD + b netOD^n (Devic et al. "
             "2004); rational D = c + b / (10^-netOD - a) (the scanner response of Lewis et al. "
             "2012). The lower AICc wins. Lowest resolvable dose: where the standard uncertainty "
             "of a reading of %g cm2 is %g times the dose.",
             c->reading_area_cm2, c->resolve_fraction);
    y = para(cr, x, y + 6, w, line, "DejaVu Sans 9");
    for (size_t i = 0; i < c->notes.count && y < 780; i++) {
        snprintf(line, sizeof line, "Warning: %s", c->notes.items[i]);
        y = para(cr, x, y, w, line, "DejaVu Sans 9");
    }
    bool ok = true;
    for (int i = 0; i < c->nchannels; i++) {
        const sl_film_channel *ch = &c->ch[i];
        cairo_show_page(cr);
        snprintf(line, sizeof line, "The %s channel%s", sl_film_channel_name(ch->channel),
                 ch->channel == c->channel ? " (used)" : "");
        y = para(cr, x, 40, w, line, "DejaVu Sans Bold 12");
        if (ch->chosen < 0) {
            para(cr, x, y, w, "Not fitted (see the warnings).", "DejaVu Sans 9");
            continue;
        }
        const sl_film_formfit *ff = &ch->forms[ch->chosen];
        snprintf(line, sizeof line,
                 "%s form (AICc %.4g; the other form %s%.4g): parameters %.5g, %.5g, %.5g. "
                 "Lowest resolvable dose %.3g cGy; calibrated to %g cGy.",
                 sl_film_form_name((sl_film_form)ch->chosen), ff->aicc,
                 ch->forms[1 - ch->chosen].ok ? "" : "not fitted, ",
                 ch->forms[1 - ch->chosen].aicc, ff->theta[0], ff->theta[1], ff->theta[2],
                 ch->lowest_dose_cgy, ch->max_dose_cgy);
        y = para(cr, x, y, w, line, "DejaVu Sans 9");
        ok = ok && channel_figures(c, ch, NULL, NULL, cr, y + 4);
    }
    cairo_show_page(cr);
    cairo_status_t cs = cairo_status(cr);
    cairo_destroy(cr);
    cairo_surface_finish(sf);
    if (cs == CAIRO_STATUS_SUCCESS)
        cs = cairo_surface_status(sf);
    cairo_surface_destroy(sf);
    if (!ok)
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    if (cs != CAIRO_STATUS_SUCCESS)
        return sl_error_set(err, SL_EIO, "the PDF report could not be written: %s",
                            cairo_status_to_string(cs));
    return SL_OK;
}

/* ------------------------------------------------------ QA page -- */

/* Scan (grey levels of the channel) or dose map (isodose bands with their
 * boundaries drawn) at most `maxw` pixels wide, with the field centre and
 * the bands sampled drawn over it. */
/* A box mean of half-width hw pixels over the finite values (two running-sum passes, so
 * the cost does not grow with hw); NAN stays NAN. For the picture only: isodose lines of
 * single noisy pixels would hide the field. */
static float *smooth_dose(const float *d, size_t w, size_t h, size_t hw)
{
    float *tmp = malloc(w * h * sizeof *tmp), *out = malloc(w * h * sizeof *out);
    float *cnt = malloc(w * h * sizeof *cnt);
    if (!tmp || !out || !cnt) {
        free(tmp);
        free(out);
        free(cnt);
        return NULL;
    }
    for (size_t y = 0; y < h; y++) {
        double s = 0, n = 0;
        const float *row = d + y * w;
        for (size_t x = 0; x < w + hw; x++) {
            if (x < w && !isnan(row[x])) {
                s += row[x];
                n++;
            }
            if (x >= 2 * hw + 1 && !isnan(row[x - 2 * hw - 1])) {
                s -= row[x - 2 * hw - 1];
                n--;
            }
            if (x >= hw) {
                tmp[y * w + x - hw] = (float)s;
                cnt[y * w + x - hw] = (float)n;
            }
        }
    }
    for (size_t x = 0; x < w; x++) {
        double s = 0, n = 0;
        for (size_t y = 0; y < h + hw; y++) {
            if (y < h) {
                s += tmp[y * w + x];
                n += cnt[y * w + x];
            }
            if (y >= 2 * hw + 1) {
                s -= tmp[(y - 2 * hw - 1) * w + x];
                n -= cnt[(y - 2 * hw - 1) * w + x];
            }
            if (y >= hw) {
                size_t i = (y - hw) * w + x;
                out[i] = isnan(d[i]) || n < 0.5 ? NAN : (float)(s / n);
            }
        }
    }
    free(tmp);
    free(cnt);
    return out;
}

static cairo_surface_t *film_picture(const film_result *r, const sl_film_curve *c, bool dose,
                                     double *scale_out)
{
    const sl_film_scan *s = r->scan;
    double scale = 460.0 / (double)(s->width > s->height ? s->width : s->height);
    size_t hw = (size_t)fmax(1, lround(0.1 / s->pixel_cm));
    float *sm = dose ? smooth_dose(r->dose, s->width, s->height, hw) : NULL;
    const float *dm = sm ? sm : r->dose;
    int W = (int)fmax(1, floor(s->width * scale)), H = (int)fmax(1, floor(s->height * scale));
    cairo_surface_t *sf = cairo_image_surface_create(CAIRO_FORMAT_RGB24, W, H);
    if (cairo_surface_status(sf) != CAIRO_STATUS_SUCCESS) {
        free(sm);
        return sf;
    }
    cairo_surface_flush(sf);
    unsigned char *data = cairo_image_surface_get_data(sf);
    int stride = cairo_image_surface_get_stride(sf);
    const uint16_t *pl = sl_film_plane(s, c->channel);
    static const double levels[] = {90, 50, 20, 10, 5, 2, 1, 0.5, 0.2};
    static const unsigned char colours[][3] = {
        {128, 0, 38}, {189, 0, 38}, {227, 26, 28}, {252, 78, 42}, {253, 141, 60},
        {254, 178, 76}, {254, 217, 118}, {255, 237, 160}, {255, 255, 204}, {255, 255, 255}};
    double ref = isfinite(r->cax_dose_cgy) ? r->cax_dose_cgy : r->cax_reference_cgy;
    int *band = malloc((size_t)W * H * sizeof *band);
    double lo = s->max_value, hi = 0;
    if (!dose)
        for (size_t k = 0; k < s->width * s->height; k += 7) {
            lo = fmin(lo, pl[k]);
            hi = fmax(hi, pl[k]);
        }
    for (int y = 0; y < H; y++)
        for (int x = 0; x < W; x++) {
            size_t sx = (size_t)((x + 0.5) / scale), sy = (size_t)((y + 0.5) / scale);
            if (sx >= s->width)
                sx = s->width - 1;
            if (sy >= s->height)
                sy = s->height - 1;
            uint32_t *px = (uint32_t *)(data + (size_t)y * stride) + x;
            if (!dose) {
                double g = hi > lo ? (pl[sy * s->width + sx] - lo) / (hi - lo) : 0.5;
                unsigned v = (unsigned)lround(255 * fmin(1, fmax(0, g)));
                *px = (v << 16) | (v << 8) | v;
                continue;
            }
            /* the mean of the block of scan pixels behind this one (NAN when most are NAN) */
            double sum = 0;
            size_t nn = 0, nall = 0;
            size_t bx1 = (size_t)((x + 1) / scale), by1 = (size_t)((y + 1) / scale);
            for (size_t yy = (size_t)(y / scale); yy < by1 && yy < s->height; yy++)
                for (size_t xx = (size_t)(x / scale); xx < bx1 && xx < s->width; xx++) {
                    float v = dm[yy * s->width + xx];
                    nall++;
                    if (!isnan(v)) {
                        sum += v;
                        nn++;
                    }
                }
            float d = nn && 2 * nn >= nall ? (float)(sum / (double)nn) : dm[sy * s->width + sx];
            int b = 9;
            if (isnan(d))
                b = 0;
            else
                for (int l = 0; l < 9; l++)
                    if (100 * d / ref >= levels[l]) {
                        b = l;
                        break;
                    }
            if (band)
                band[y * W + x] = b;
            *px = ((unsigned)colours[b][0] << 16) | ((unsigned)colours[b][1] << 8) |
                  colours[b][2];
        }
    if (dose && band)
        for (int y = 0; y + 1 < H; y++)
            for (int x = 0; x + 1 < W; x++)
                if (band[y * W + x] != band[y * W + x + 1] ||
                    band[y * W + x] != band[(y + 1) * W + x]) {
                    /* the 50 % line (the field found) in blue, the others dark */
                    bool in = band[y * W + x] <= 1, r = band[y * W + x + 1] <= 1,
                         d = band[(y + 1) * W + x] <= 1;
                    *((uint32_t *)(data + (size_t)y * stride) + x) =
                        in != r || in != d ? 0x1b5ee0 : 0x202020;
                }
    free(band);
    free(sm);
    cairo_surface_mark_dirty(sf);
    cairo_t *cr = cairo_create(sf);
    /* centre and sampled bands */
    cairo_set_source_rgb(cr, 0.1, 0.37, 0.85);
    cairo_set_line_width(cr, 1.2);
    double cx = r->cx * scale, cy = r->cy * scale;
    cairo_move_to(cr, cx - 6, cy);
    cairo_line_to(cr, cx + 6, cy);
    cairo_move_to(cr, cx, cy - 6);
    cairo_line_to(cr, cx, cy + 6);
    cairo_stroke(cr);
    double hb = r->band_cm / 2 / s->pixel_cm * scale;
    for (size_t i = 0; i < r->nlines; i++) {
        const film_line *L = &r->lines[i];
        double step = r->step_cm / s->pixel_cm * scale;
        double t0 = (L->kmin - 0.5) * step, t1 = (L->kmax + 0.5) * step;
        double vx = -L->uy, vy = L->ux;
        cairo_move_to(cr, cx + t0 * L->ux + hb * vx, cy + t0 * L->uy + hb * vy);
        cairo_line_to(cr, cx + t1 * L->ux + hb * vx, cy + t1 * L->uy + hb * vy);
        cairo_line_to(cr, cx + t1 * L->ux - hb * vx, cy + t1 * L->uy - hb * vy);
        cairo_line_to(cr, cx + t0 * L->ux - hb * vx, cy + t0 * L->uy - hb * vy);
        cairo_close_path(cr);
        cairo_stroke(cr);
    }
    cairo_destroy(cr);
    *scale_out = scale;
    return sf;
}

static const char *const dnames[] = {"crossplane", "inplane", "diagonal"};

sl_status sl_film_qa_page(const film_result *r, const sl_film_curve *c, FILE *fp, sl_error *err)
{
    hdoc h;
    char title[300];
    snprintf(title, sizeof title, "strayline film QA: %s", r->id);
    if (!hdoc_new(&h, title, sl_report_css))
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    helf(&h, h.body, "h1", "Film %s", r->id);
    caution(&h, c->notice);
    xmlNodePtr t = hel(&h, h.body, "table", NULL);
    char b[12][128];
    snprintf(b[0], 128, "%g MeV, applicator %s, insert %s, depth %g cm", r->energy_mev,
             r->applicator, r->insert, r->depth_cm);
    snprintf(b[1], 128, "%g MU; central-axis maximum for them %g cGy", r->monitor_units,
             r->cax_reference_cgy);
    snprintf(b[2], 128, "%.4f cm (%s)", r->scan->pixel_cm,
             r->scan->dpi_from_tags ? "resolution tags" : "given");
    snprintf(b[3], 128, "(%.3f, %.3f) cm from the scan's top left corner",
             r->cx * r->scan->pixel_cm, r->cy * r->scan->pixel_cm);
    snprintf(b[4], 128, "%.2f deg", r->angle_deg);
    if (isfinite(r->cax_dose_cgy))
        snprintf(b[5], 128, "%.4g cGy (%.1f %% of the maximum)", r->cax_dose_cgy,
                 100 * r->cax_dose_cgy / r->cax_reference_cgy);
    else
        snprintf(b[5], 128, "above the calibrated range (%g cGy)", r->max_dose_cgy);
    if (r->triple && isfinite(r->axis_cell_cgy)) {
        /* the map is the one channel's; the profiles' centre cell is the three channels' */
        size_t l = strlen(b[5]);
        snprintf(b[5] + l, 128 - l, "; the centre's cell, triple-channel: %.4g cGy",
                 r->axis_cell_cgy);
    }
    snprintf(b[6], 128, "%.4g cGy", r->threshold_cgy);
    snprintf(b[7], 128, "%g cm across, points every %g cm", r->band_cm, r->step_cm);
    char chan[400], tau[300];
    if (r->triple) {
        size_t low = 0, high = 0;
        for (size_t i = 0; i < r->nlines; i++) {
            low += r->lines[i].dropped_low;
            high += r->lines[i].dropped_high;
        }
        snprintf(chan, sizeof chan,
                 "red, green and blue together (triple-channel): one film thickness factor "
                 "per profile cell scales each channel's total optical density; the dose map "
                 "below is the %s channel's with the factor of its %.2g cm block (%zu of %zu "
                 "blocks without one took the film's median)",
                 sl_film_channel_name(c->channel), r->map_block_cm, r->map_blocks_filled,
                 r->map_blocks);
        if (r->ntau)
            snprintf(tau, sizeof tau,
                     "median %.4f, range %.4f to %.4f over %zu cells with a dose; %zu cells "
                     "dropped with the factor on the bound of %g to %g, %zu below the lowest "
                     "dose, %zu above the range",
                     r->tau_median, r->tau_min, r->tau_max, r->ntau, r->dropped_tau,
                     SL_FILM_TAU_LO, SL_FILM_TAU_HI, low, high);
        else
            snprintf(tau, sizeof tau, "no cell gave a dose; %zu cells dropped with the factor "
                                      "on the bound of %g to %g",
                     r->dropped_tau, SL_FILM_TAU_LO, SL_FILM_TAU_HI);
    } else {
        snprintf(chan, sizeof chan, "the %s channel (single channel)",
                 sl_film_channel_name(c->channel));
        snprintf(tau, sizeof tau, "not found (single channel)");
    }
    const char *rows[][2] = {
        {"scan", r->scan_name}, {"SHA-256", r->scan->sha256}, {"set-up", b[0]},
        {"exposure", b[1]},     {"pixel size", b[2]},        {"field centre", b[3]},
        {"field turned by", b[4]}, {"dose on the axis", b[5]}, {"field found at", b[6]},
        {"band averaged", b[7]}, {"curve", c->source},    {"dose from", chan},
        {"film thickness factor", tau},
    };
    for (size_t i = 0; i < sizeof rows / sizeof rows[0]; i++)
        hrow(&h, t, false, rows[i], 2);
    xmlNodePtr grid = hel(&h, h.body, "div", NULL);
    hattr(&h, grid, "class", "grid");
    double scale;
    cairo_surface_t *sf = film_picture(r, c, false, &scale);
    bool ok = cairo_surface_status(sf) == CAIRO_STATUS_SUCCESS &&
              put_image(&h, grid, sf, "the scan with the field centre and the bands sampled");
    cairo_surface_destroy(sf);
    sf = film_picture(r, c, true, &scale);
    ok = ok && cairo_surface_status(sf) == CAIRO_STATUS_SUCCESS &&
         put_image(&h, grid, sf, "the dose map with isodose lines");
    cairo_surface_destroy(sf);
    hel(&h, h.body, "p",
        "Left: the scan (the calibrated channel), the field centre (cross) and the bands "
        "sampled. Right: the dose map in isodose bands of 90, 50, 20, 10, 5, 2, 1, 0.5 and "
        "0.2 % of the dose on the axis (of the central-axis maximum when the axis is above the "
        "calibrated range; darkest red: above the range), with the band boundaries drawn (the "
        "50 % line, the field found, in blue); for the picture only, the map is averaged over "
        "0.2 cm squares.");
    for (size_t i = 0; i < r->nlines; i++) {
        const film_line *L = &r->lines[i];
        size_t n = (size_t)(L->kmax - L->kmin + 1);
        double *x = malloc(n * sizeof *x), *y = malloc(n * sizeof *y), *e = malloc(n * sizeof *e);
        if (!x || !y || !e) {
            free(x);
            free(y);
            free(e);
            hdoc_free(&h);
            return sl_error_set(err, SL_ENOMEM, "out of memory");
        }
        double ymin = INFINITY, ymax = 0;
        for (size_t k = 0; k < n; k++) {
            x[k] = (double)(L->kmin + (long)k) * r->step_cm;
            y[k] = 100 * L->dose_cgy[k] / r->cax_reference_cgy;
            e[k] = 100 * L->sigma_cgy[k] / r->cax_reference_cgy;
            if (isfinite(y[k]) && y[k] > 0) {
                ymin = fmin(ymin, y[k]);
                ymax = fmax(ymax, y[k]);
            }
        }
        cplot p = {0};
        char pt[160];
        snprintf(pt, sizeof pt, "%s profile: %zu points below the lowest dose, %zu above the range",
                 dnames[L->direction], L->dropped_low, L->dropped_high);
        if (isfinite(ymin) &&
            plot_begin(&p, NULL, 620, 320, x[0], x[n - 1], ymin, ymax, true, "off-axis position (cm)",
                       "dose (% of the central-axis maximum)", pt)) {
            plot_points(&p, x, y, e, n, 0.7, 0.15, 0.12);
            plot_hline(&p, 50 * (isfinite(r->cax_dose_cgy) ? r->cax_dose_cgy : NAN) /
                               r->cax_reference_cgy,
                       0.1, 0.37, 0.62);
            cairo_surface_flush(p.sf);
            ok = ok && put_image(&h, h.body, p.sf, pt);
        } else
            hel(&h, h.body, "p", "No point of this profile was resolved on this film.");
        plot_end(&p);
        /* the thickness factor along the profile: a smooth film reads a smooth factor */
        if (r->triple) {
            double tmin = INFINITY, tmax = -INFINITY;
            for (size_t k = 0; k < n; k++) {
                y[k] = isfinite(L->dose_cgy[k]) ? L->tau[k] : NAN;
                e[k] = L->tau_sigma[k];
                if (isfinite(y[k])) {
                    tmin = fmin(tmin, y[k] - (isfinite(e[k]) ? e[k] : 0));
                    tmax = fmax(tmax, y[k] + (isfinite(e[k]) ? e[k] : 0));
                }
            }
            cplot q = {0};
            snprintf(pt, sizeof pt, "%s profile: film thickness factor of each cell with a dose",
                     dnames[L->direction]);
            if (isfinite(tmin) &&
                plot_begin(&q, NULL, 620, 220, x[0], x[n - 1], fmin(tmin, 0.99), fmax(tmax, 1.01),
                           false, "off-axis position (cm)", "thickness factor", pt)) {
                plot_hline(&q, 1, 0.1, 0.37, 0.62);
                plot_points(&q, x, y, e, n, 0.15, 0.35, 0.15);
                cairo_surface_flush(q.sf);
                ok = ok && put_image(&h, h.body, q.sf, pt);
            }
            plot_end(&q);
        }
        free(x);
        free(y);
        free(e);
    }
    if (!ok) {
        hdoc_free(&h);
        return sl_error_set(err, SL_ENOMEM, "a figure could not be drawn");
    }
    return hdoc_write(&h, fp, err);
}
