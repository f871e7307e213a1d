/*
 * HTML documents and inline SVG plots over libxml2 (see html.h).
 */
#include "html.h"

#include <math.h>
#include <stdarg.h>
#include <stdlib.h>
#include <string.h>

#include <libxml/HTMLparser.h>

const char sl_report_css[] =
    "body{font-family:'DejaVu Sans',Arial,sans-serif;font-size:10.5pt;color:#111;"
    "margin:1.2em auto;max-width:62em;line-height:1.35}"
    "h1{font-size:1.5em;margin:.2em 0}h2{font-size:1.2em;margin-top:1.4em;"
    "border-bottom:1px solid #999}h3{font-size:1.05em;margin:1em 0 .3em}"
    "table{border-collapse:collapse;margin:.4em 0 .8em}"
    "th,td{border:1px solid #bbb;padding:.15em .45em;text-align:left;vertical-align:top}"
    "td.n{text-align:right;font-variant-numeric:tabular-nums}th{background:#eee}"
    ".caution{border:2px solid #333;padding:.4em .8em;margin:.8em 0;background:#f6f6f6}"
    ".notice{font-weight:bold;letter-spacing:.03em}"
    ".banner{border:3px solid #111;padding:.4em .8em;margin:.6em 0;font-weight:bold;"
    "letter-spacing:.02em}"
    ".whatif{border:3px dashed #7a3e00;background:#fff4e0;padding:.4em .8em;margin:.6em 0}"
    ".verdict{border:2px solid #333;padding:.2em .8em .6em;margin:.8em 0}"
    ".verdict.attention{border:4px solid #8b1a1a}"
    ".verdict h2{margin:.4em 0}.verdict .cue{font-size:1.2em;text-align:center;width:1.5em}"
    "tr.v-att td{background:#f7dede}tr.v-meas td{background:#fdf1d2}"
    "tr.v-nj td{background:#e6e6ef}tr.v-att td:nth-child(3){font-weight:bold}"
    ".status-exceeds{font-weight:bold}.status-may{font-weight:bold;font-style:italic}"
    ".small{font-size:.85em;color:#333}.grid{display:flex;flex-wrap:wrap;gap:.6em}"
    "svg{display:block;margin:.3em 0;background:#fff}"
    "svg text{font-family:'DejaVu Sans',Arial,sans-serif;font-size:11px;fill:#111}"
    "svg .axis{stroke:#111;stroke-width:1;fill:none}"
    "svg .grid{stroke:#ddd;stroke-width:.6;fill:none}"
    "svg .fit{stroke:#1b5e9e;stroke-width:1.8;fill:none}"
    "svg .data{fill:#b3261e;stroke:none}svg .err{stroke:#b3261e;stroke-width:.8}"
    "svg .band{fill:#1b5e9e;fill-opacity:.18;stroke:none}"
    "svg .zero{stroke:#555;stroke-dasharray:4 3;fill:none}"
    "svg .mark{fill:#111;stroke:#fff;stroke-width:1}"
    "svg .field{fill:#f2c94c;fill-opacity:.45;stroke:#8a6d00;stroke-width:1.5}"
    "svg .applicator{fill:none;stroke:#555;stroke-width:1.2;stroke-dasharray:6 3}"
    "svg .ring{fill:none;stroke:#999;stroke-width:.8;stroke-dasharray:2 3}"
    "svg .organ{fill:#1b5e9e;fill-opacity:.25;stroke:#1b5e9e;stroke-width:1}"
    "svg .organ-in{fill:#b3261e;fill-opacity:.25;stroke:#b3261e;stroke-width:1}"
    "svg .dvh{stroke-width:1.6;fill:none}"
    "@media print{body{max-width:none;margin:0;font-size:9.5pt}"
    "h2{break-after:avoid}section,figure,table,svg{break-inside:avoid}"
    ".noprint{display:none}a{color:#111;text-decoration:none}}"
    "@page{size:A4;margin:14mm}";

bool hdoc_new(hdoc *h, const char *title, const char *css)
{
    memset(h, 0, sizeof *h);
    h->doc = htmlNewDocNoDtD(NULL, NULL);
    if (!h->doc)
        return false;
    xmlCreateIntSubset(h->doc, BAD_CAST "html", NULL, NULL);
    xmlNodePtr html = xmlNewNode(NULL, BAD_CAST "html");
    if (!html) {
        hdoc_free(h);
        return false;
    }
    xmlDocSetRootElement(h->doc, html);
    xmlNewProp(html, BAD_CAST "lang", BAD_CAST "en");
    h->head = xmlNewChild(html, NULL, BAD_CAST "head", NULL);
    xmlNodePtr meta = xmlNewChild(h->head, NULL, BAD_CAST "meta", NULL);
    xmlNewProp(meta, BAD_CAST "charset", BAD_CAST "utf-8");
    hel(h, h->head, "title", title);
    hel(h, h->head, "style", css);
    h->body = xmlNewChild(html, NULL, BAD_CAST "body", NULL);
    return h->head && h->body && !h->failed;
}

void hdoc_free(hdoc *h)
{
    if (h->doc)
        xmlFreeDoc(h->doc);
    h->doc = NULL;
}

sl_status hdoc_write(hdoc *h, FILE *fp, sl_error *err)
{
    if (h->failed) {
        hdoc_free(h);
        return sl_error_set(err, SL_ENOMEM, "out of memory building the HTML report");
    }
    xmlChar *mem = NULL;
    int size = 0;
    htmlDocDumpMemoryFormat(h->doc, &mem, &size, 1);
    hdoc_free(h);
    if (!mem)
        return sl_error_set(err, SL_ENOMEM, "out of memory writing the HTML report");
    size_t n = fwrite(mem, 1, (size_t)size, fp);
    xmlFree(mem);
    if (n != (size_t)size)
        return sl_error_set(err, SL_EIO, "cannot write the HTML report");
    return SL_OK;
}

xmlNodePtr hel(hdoc *h, xmlNodePtr parent, const char *name, const char *text)
{
    if (h->failed || !parent)
        return NULL;
    xmlNodePtr n = xmlNewNode(NULL, BAD_CAST name);
    if (!n) {
        h->failed = true;
        return NULL;
    }
    if (text) {
        /* a text node: the serialiser escapes it (raw inside style) */
        xmlNodePtr t = xmlNewText(BAD_CAST text);
        if (!t) {
            xmlFreeNode(n);
            h->failed = true;
            return NULL;
        }
        xmlAddChild(n, t);
    }
    xmlAddChild(parent, n);
    return n;
}

xmlNodePtr helf(hdoc *h, xmlNodePtr parent, const char *name, const char *fmt, ...)
{
    char buf[2048];
    va_list ap;
    va_start(ap, fmt);
    vsnprintf(buf, sizeof buf, fmt, ap);
    va_end(ap);
    return hel(h, parent, name, buf);
}

void hattr(hdoc *h, xmlNodePtr n, const char *key, const char *value)
{
    if (h->failed || !n)
        return;
    if (!xmlSetProp(n, BAD_CAST key, BAD_CAST value))
        h->failed = true;
}

void hattrf(hdoc *h, xmlNodePtr n, const char *key, const char *fmt, ...)
{
    char buf[4096];
    va_list ap;
    va_start(ap, fmt);
    vsnprintf(buf, sizeof buf, fmt, ap);
    va_end(ap);
    hattr(h, n, key, buf);
}

void htext(hdoc *h, xmlNodePtr n, const char *text)
{
    if (h->failed || !n)
        return;
    xmlNodePtr t = xmlNewText(BAD_CAST text);
    if (!t)
        h->failed = true;
    else
        xmlAddChild(n, t);
}

xmlNodePtr hrow(hdoc *h, xmlNodePtr table, bool header, const char *const *cells, size_t n)
{
    xmlNodePtr tr = hel(h, table, "tr", NULL);
    for (size_t i = 0; i < n; i++)
        hel(h, tr, header ? "th" : "td", cells[i] ? cells[i] : "");
    return tr;
}

/* ---------------------------------------------------------------- SVG -- */

double hplot_x(const hplot *p, double x)
{
    return p->left + (x - p->x0) / (p->x1 - p->x0) * (p->w - p->left - p->right);
}

double hplot_y(const hplot *p, double y)
{
    double f;
    if (p->logy)
        f = (log10(fmax(y, 1e-300)) - log10(p->y0)) / (log10(p->y1) - log10(p->y0));
    else
        f = (y - p->y0) / (p->y1 - p->y0);
    f = fmin(fmax(f, -0.05), 1.05); /* keep strays in sight, just past the axes */
    return p->hgt - p->bottom - f * (p->hgt - p->top - p->bottom);
}

static xmlNodePtr svg_text(hplot *p, double x, double y, const char *anchor, const char *text)
{
    xmlNodePtr t = hel(p->h, p->g, "text", text);
    hattrf(p->h, t, "x", "%.1f", x);
    hattrf(p->h, t, "y", "%.1f", y);
    hattr(p->h, t, "text-anchor", anchor);
    return t;
}

static void svg_line(hplot *p, double x1, double y1, double x2, double y2, const char *cls)
{
    xmlNodePtr l = hel(p->h, p->g, "line", NULL);
    hattrf(p->h, l, "x1", "%.1f", x1);
    hattrf(p->h, l, "y1", "%.1f", y1);
    hattrf(p->h, l, "x2", "%.1f", x2);
    hattrf(p->h, l, "y2", "%.1f", y2);
    hattr(p->h, l, "class", cls);
}

static double nice_step(double span)
{
    double raw = span / 6, mag = pow(10, floor(log10(raw)));
    double f = raw / mag;
    return (f < 1.5 ? 1 : f < 3.5 ? 2 : f < 7.5 ? 5 : 10) * mag;
}

void hplot_begin(hplot *p, hdoc *h, xmlNodePtr parent, double w, double hgt, double x0,
                 double x1, double y0, double y1, bool logy, const char *xlabel,
                 const char *ylabel, const char *title)
{
    memset(p, 0, sizeof *p);
    p->h = h;
    p->w = w;
    p->hgt = hgt;
    p->left = 58;
    p->right = 14;
    p->top = title ? 22 : 10;
    p->bottom = 40;
    p->x0 = x0;
    p->x1 = x1 > x0 ? x1 : x0 + 1;
    p->logy = logy;
    if (logy) {
        y0 = pow(10, floor(log10(fmax(y0, 1e-6))));
        y1 = pow(10, ceil(log10(fmax(y1, y0 * 10))));
    } else if (!(y1 > y0)) {
        y1 = y0 + 1;
    }
    p->y0 = y0;
    p->y1 = y1;
    p->svg = hel(h, parent, "svg", NULL);
    hattrf(h, p->svg, "width", "%.0f", w);
    hattrf(h, p->svg, "height", "%.0f", hgt);
    hattrf(h, p->svg, "viewBox", "0 0 %.0f %.0f", w, hgt);
    hattr(h, p->svg, "role", "img");
    if (title)
        hattr(h, p->svg, "aria-label", title);
    p->g = hel(h, p->svg, "g", NULL);
    double xl = p->left, xr = w - p->right, yt = p->top, yb = hgt - p->bottom;
    /* grid and ticks */
    double step = nice_step(p->x1 - p->x0);
    char buf[32];
    for (double x = ceil(p->x0 / step) * step; x <= p->x1 + 1e-9; x += step) {
        double px = hplot_x(p, x);
        svg_line(p, px, yt, px, yb, "grid");
        snprintf(buf, sizeof buf, "%g", fabs(x) < 1e-12 ? 0.0 : x);
        svg_text(p, px, yb + 14, "middle", buf);
    }
    if (logy) {
        for (double y = p->y0; y <= p->y1 * 1.0001; y *= 10) {
            double py = hplot_y(p, y);
            svg_line(p, xl, py, xr, py, "grid");
            snprintf(buf, sizeof buf, "%g", y);
            svg_text(p, xl - 5, py + 4, "end", buf);
        }
    } else {
        double ys = nice_step(p->y1 - p->y0);
        for (double y = ceil(p->y0 / ys) * ys; y <= p->y1 + 1e-9; y += ys) {
            double py = hplot_y(p, y);
            svg_line(p, xl, py, xr, py, "grid");
            snprintf(buf, sizeof buf, "%g", fabs(y) < 1e-12 ? 0.0 : y);
            svg_text(p, xl - 5, py + 4, "end", buf);
        }
    }
    xmlNodePtr frame = hel(h, p->g, "rect", NULL);
    hattrf(h, frame, "x", "%.1f", xl);
    hattrf(h, frame, "y", "%.1f", yt);
    hattrf(h, frame, "width", "%.1f", xr - xl);
    hattrf(h, frame, "height", "%.1f", yb - yt);
    hattr(h, frame, "class", "axis");
    svg_text(p, (xl + xr) / 2, hgt - 6, "middle", xlabel);
    xmlNodePtr yl = svg_text(p, 12, (yt + yb) / 2, "middle", ylabel);
    hattrf(h, yl, "transform", "rotate(-90 12 %.1f)", (yt + yb) / 2);
    if (title) {
        xmlNodePtr t = svg_text(p, xl, 14, "start", title);
        hattr(h, t, "font-weight", "bold");
    }
}

static void path_points(hplot *p, const double *x, const double *y, size_t n, char **out,
                        size_t *len, size_t *cap, bool first_move)
{
    for (size_t i = 0; i < n; i++) {
        if (!isfinite(y[i]) || !isfinite(x[i]))
            continue;
        char seg[64];
        int k = snprintf(seg, sizeof seg, "%s%.1f %.1f ", (i == 0 && first_move) ? "M" : "L",
                         hplot_x(p, x[i]), hplot_y(p, y[i]));
        if (*len + (size_t)k + 1 > *cap) {
            *cap = (*cap + (size_t)k + 1) * 2;
            char *nb = realloc(*out, *cap);
            if (!nb) {
                p->h->failed = true;
                return;
            }
            *out = nb;
        }
        memcpy(*out + *len, seg, (size_t)k + 1);
        *len += (size_t)k;
    }
}

void hplot_line(hplot *p, const double *x, const double *y, size_t n, const char *cls)
{
    char *d = NULL;
    size_t len = 0, cap = 0;
    path_points(p, x, y, n, &d, &len, &cap, true);
    if (!d)
        return;
    xmlNodePtr path = hel(p->h, p->g, "path", NULL);
    hattr(p->h, path, "d", d);
    hattr(p->h, path, "class", cls);
    free(d);
}

void hplot_band(hplot *p, const double *x, const double *lo, const double *hi, size_t n,
                const char *cls)
{
    char *d = NULL;
    size_t len = 0, cap = 0;
    path_points(p, x, hi, n, &d, &len, &cap, true);
    double *rx = malloc(n * sizeof *rx), *ry = malloc(n * sizeof *ry);
    if (!rx || !ry) {
        free(rx);
        free(ry);
        free(d);
        p->h->failed = true;
        return;
    }
    for (size_t i = 0; i < n; i++) {
        rx[i] = x[n - 1 - i];
        ry[i] = lo[n - 1 - i];
    }
    path_points(p, rx, ry, n, &d, &len, &cap, false);
    free(rx);
    free(ry);
    if (!d)
        return;
    xmlNodePtr path = hel(p->h, p->g, "path", NULL);
    hattrf(p->h, path, "d", "%sZ", d);
    hattr(p->h, path, "class", cls);
    free(d);
}

void hplot_points(hplot *p, const double *x, const double *y, const double *err, size_t n,
                  const char *cls)
{
    for (size_t i = 0; i < n; i++) {
        if (!isfinite(y[i]))
            continue;
        double px = hplot_x(p, x[i]), py = hplot_y(p, y[i]);
        if (err) {
            double lo = p->logy ? fmax(y[i] - err[i], y[i] * 0.05) : y[i] - err[i];
            svg_line(p, px, hplot_y(p, lo), px, hplot_y(p, y[i] + err[i]), "err");
        }
        xmlNodePtr c = hel(p->h, p->g, "circle", NULL);
        hattrf(p->h, c, "cx", "%.1f", px);
        hattrf(p->h, c, "cy", "%.1f", py);
        hattr(p->h, c, "r", "2.2");
        hattr(p->h, c, "class", cls);
    }
}

void hplot_hline(hplot *p, double y, const char *cls)
{
    svg_line(p, p->left, hplot_y(p, y), p->w - p->right, hplot_y(p, y), cls);
}

void hplot_marker(hplot *p, double x, double y, const char *label, const char *cls)
{
    double px = hplot_x(p, x), py = hplot_y(p, y);
    xmlNodePtr c = hel(p->h, p->g, "circle", NULL);
    hattrf(p->h, c, "cx", "%.1f", px);
    hattrf(p->h, c, "cy", "%.1f", py);
    hattr(p->h, c, "r", "4");
    hattr(p->h, c, "class", cls);
    if (label)
        svg_text(p, px + 6, py - 6, "start", label);
}
