/*
 * The page typesetter of pdf.h. Layout is done with Pango (line breaking,
 * fonts, UTF-8) and drawn with cairo onto a PDF surface; nothing here
 * writes PDF syntax itself. The document is laid out twice so that every
 * page can say "page n of m": the counting pass draws onto a PDF surface
 * whose bytes are thrown away, which keeps both passes identical.
 */
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include <cairo-pdf.h>

#include "pdf.h"

#define FONT "DejaVu Sans"

void pdoc_paper(const char *paper, double *w, double *h)
{
    if (paper && strcmp(paper, "letter") == 0) {
        *w = 612;
        *h = 792;
    } else { /* A4, 210 x 297 mm */
        *w = 595.2756;
        *h = 841.8898;
    }
}

static cairo_status_t keep(void *closure, const unsigned char *data, unsigned int len)
{
    pdoc *d = closure;
    if (d->total == 0)
        return CAIRO_STATUS_SUCCESS; /* the counting pass */
    if (d->out.len + len + 1 > d->out.cap) {
        size_t cap = d->out.cap ? d->out.cap : 65536;
        while (cap < d->out.len + len + 1)
            cap *= 2;
        char *p = realloc(d->out.data, cap);
        if (!p) {
            d->out.failed = true;
            return CAIRO_STATUS_WRITE_ERROR;
        }
        d->out.data = p;
        d->out.cap = cap;
    }
    memcpy(d->out.data + d->out.len, data, len);
    d->out.len += len;
    return CAIRO_STATUS_SUCCESS;
}

bool pdoc_begin(pdoc *d, double w, double h, int total)
{
    d->w = w;
    d->h = h;
    d->left = d->right = 50;
    d->top = 62;
    d->bottom = 56;
    d->page = 0;
    d->total = total;
    d->failed = false;
    d->surface = cairo_pdf_surface_create_for_stream(keep, d, w, h);
    if (cairo_surface_status(d->surface) != CAIRO_STATUS_SUCCESS)
        return false;
    cairo_pdf_surface_set_metadata(d->surface, CAIRO_PDF_METADATA_CREATOR, "strayline");
    d->cr = cairo_create(d->surface);
    pdoc_new_page(d);
    return cairo_status(d->cr) == CAIRO_STATUS_SUCCESS;
}

static PangoLayout *layout(pdoc *d, const char *text, double size, bool bold, bool markup,
                           double width)
{
    PangoLayout *l = pango_cairo_create_layout(d->cr);
    PangoFontDescription *f = pango_font_description_from_string(FONT);
    pango_font_description_set_absolute_size(f, size * PANGO_SCALE);
    if (bold)
        pango_font_description_set_weight(f, PANGO_WEIGHT_BOLD);
    pango_layout_set_font_description(l, f);
    pango_font_description_free(f);
    pango_layout_set_width(l, (int)(width * PANGO_SCALE));
    pango_layout_set_wrap(l, PANGO_WRAP_WORD_CHAR);
    if (markup)
        pango_layout_set_markup(l, text, -1);
    else
        pango_layout_set_text(l, text, -1);
    return l;
}

static double layout_h(PangoLayout *l)
{
    int w, h;
    pango_layout_get_size(l, &w, &h);
    return (double)h / PANGO_SCALE;
}

static void draw_at(pdoc *d, PangoLayout *l, double x, double y)
{
    cairo_move_to(d->cr, x, y);
    pango_cairo_show_layout(d->cr, l);
}

static void running_head(pdoc *d)
{
    cairo_t *cr = d->cr;
    double tw = d->w - d->left - d->right;
    cairo_set_source_rgb(cr, 0.15, 0.15, 0.15);
    PangoLayout *l = layout(d, d->head_left, 8, true, false, tw * 0.55);
    draw_at(d, l, d->left, 28);
    g_object_unref(l);
    l = layout(d, d->head_right, 8, false, false, tw * 0.45);
    pango_layout_set_alignment(l, PANGO_ALIGN_RIGHT);
    draw_at(d, l, d->left + tw * 0.55, 28);
    g_object_unref(l);
    cairo_set_line_width(cr, 0.6);
    cairo_move_to(cr, d->left, 48);
    cairo_line_to(cr, d->w - d->right, 48);
    cairo_stroke(cr);
    char foot[64];
    if (d->total)
        snprintf(foot, sizeof foot, "page %d of %d", d->page, d->total);
    else
        snprintf(foot, sizeof foot, "page %d of ?", d->page);
    cairo_move_to(cr, d->left, d->h - 42);
    cairo_line_to(cr, d->w - d->right, d->h - 42);
    cairo_stroke(cr);
    l = layout(d, d->foot_left, 7.5, false, false, tw * 0.8);
    draw_at(d, l, d->left, d->h - 38);
    g_object_unref(l);
    l = layout(d, foot, 8, true, false, tw * 0.2);
    pango_layout_set_alignment(l, PANGO_ALIGN_RIGHT);
    draw_at(d, l, d->left + tw * 0.8, d->h - 38);
    g_object_unref(l);
    cairo_set_source_rgb(cr, 0, 0, 0);
}

void pdoc_new_page(pdoc *d)
{
    if (d->page > 0)
        cairo_show_page(d->cr);
    d->page++;
    d->y = d->top;
    running_head(d);
}

void pdoc_need(pdoc *d, double need)
{
    if (d->y + need > d->h - d->bottom && d->y > d->top + 1)
        pdoc_new_page(d);
}

void pdoc_skip(pdoc *d, double pt)
{
    d->y += pt;
}

void pdoc_heading(pdoc *d, const char *text, double size)
{
    double tw = d->w - d->left - d->right;
    PangoLayout *l = layout(d, text, size, true, false, tw);
    double hh = layout_h(l);
    /* a heading never ends a page: keep room for it and three lines */
    pdoc_need(d, hh + 6 + 3 * 12);
    d->y += 4;
    draw_at(d, l, d->left, d->y);
    d->y += hh + 4;
    g_object_unref(l);
}

static void para(pdoc *d, const char *text, double size, bool bold, bool markup)
{
    double tw = d->w - d->left - d->right;
    PangoLayout *l = layout(d, text, size, bold, markup, tw);
    double hh = layout_h(l);
    if (d->y + hh > d->h - d->bottom) {
        /* a long paragraph is split at a line boundary */
        int n = pango_layout_get_line_count(l);
        double lh = hh / (n ? n : 1);
        if (n > 4 && d->h - d->bottom - d->y > 3 * lh) {
            PangoLayoutIter *it = pango_layout_get_iter(l);
            int line = 0, cut = 0;
            do {
                PangoRectangle r;
                pango_layout_iter_get_line_extents(it, NULL, &r);
                if (d->y + (double)(r.y + r.height) / PANGO_SCALE > d->h - d->bottom)
                    break;
                cut = pango_layout_iter_get_index(it);
                line++;
            } while (pango_layout_iter_next_line(it));
            pango_layout_iter_free(it);
            PangoLayoutLine *ll = pango_layout_get_line_readonly(l, line);
            size_t at = ll ? (size_t)ll->start_index : (size_t)cut;
            const char *txt = pango_layout_get_text(l);
            if (!markup && at > 0 && at < strlen(txt)) {
                char *first = g_strndup(txt, at);
                char *rest = g_strdup(txt + at);
                g_object_unref(l);
                para(d, first, size, bold, false);
                pdoc_new_page(d);
                para(d, rest, size, bold, false);
                g_free(first);
                g_free(rest);
                return;
            }
        }
        pdoc_new_page(d);
    }
    draw_at(d, l, d->left, d->y);
    d->y += hh + 3;
    g_object_unref(l);
}

void pdoc_para(pdoc *d, const char *text, double size, bool bold)
{
    para(d, text, size, bold, false);
}

void pdoc_markup(pdoc *d, const char *markup, double size)
{
    para(d, markup, size, false, true);
}

void pdoc_banner(pdoc *d, const char *text, double size, double border, double r, double g,
                 double b, bool dashed)
{
    double tw = d->w - d->left - d->right, pad = 5;
    PangoLayout *l = layout(d, text, size, true, false, tw - 2 * pad - 2 * border);
    double hh = layout_h(l) + 2 * pad;
    pdoc_need(d, hh + 6);
    cairo_t *cr = d->cr;
    cairo_save(cr);
    cairo_rectangle(cr, d->left, d->y, tw, hh);
    cairo_set_source_rgb(cr, 1 - 0.1 * (1 - r), 1 - 0.1 * (1 - g), 1 - 0.1 * (1 - b));
    cairo_fill_preserve(cr);
    cairo_set_source_rgb(cr, r, g, b);
    cairo_set_line_width(cr, border);
    if (dashed) {
        double dash[] = {5, 3};
        cairo_set_dash(cr, dash, 2, 0);
    }
    cairo_stroke(cr);
    cairo_restore(cr);
    draw_at(d, l, d->left + pad + border, d->y + pad);
    d->y += hh + 6;
    g_object_unref(l);
}

static double row_height(pdoc *d, const ptable *t, const char *const *cells, bool bold_first,
                         bool head, PangoLayout **ls)
{
    double tw = d->w - d->left - d->right, hmax = 0;
    for (size_t c = 0; c < t->ncols; c++) {
        ls[c] = layout(d, cells[c] ? cells[c] : "", t->size, head || (bold_first && c == 0),
                       false, t->widths[c] * tw - 6);
        hmax = fmax(hmax, layout_h(ls[c]));
    }
    return hmax + 5;
}

static void draw_row(pdoc *d, const ptable *t, PangoLayout **ls, double rh, const double *fill)
{
    double tw = d->w - d->left - d->right, x = d->left;
    cairo_t *cr = d->cr;
    if (fill) {
        cairo_set_source_rgb(cr, fill[0], fill[1], fill[2]);
        cairo_rectangle(cr, d->left, d->y, tw, rh);
        cairo_fill(cr);
    }
    cairo_set_source_rgb(cr, 0, 0, 0);
    for (size_t c = 0; c < t->ncols; c++) {
        draw_at(d, ls[c], x + 3, d->y + 2.5);
        x += t->widths[c] * tw;
        g_object_unref(ls[c]);
    }
    cairo_set_source_rgb(cr, 0.6, 0.6, 0.6);
    cairo_set_line_width(cr, 0.4);
    cairo_move_to(cr, d->left, d->y + rh);
    cairo_line_to(cr, d->left + tw, d->y + rh);
    cairo_stroke(cr);
    cairo_set_source_rgb(cr, 0, 0, 0);
    d->y += rh;
}

void pdoc_table_head(pdoc *d, const ptable *t)
{
    PangoLayout *ls[32];
    if (t->ncols > 32)
        return;
    double rh = row_height(d, t, t->head, false, true, ls);
    /* the header never stands alone at a page's foot */
    if (d->y + rh + 3 * (t->size + 8) > d->h - d->bottom) {
        for (size_t c = 0; c < t->ncols; c++)
            g_object_unref(ls[c]);
        pdoc_new_page(d);
        rh = row_height(d, t, t->head, false, true, ls);
    }
    static const double grey[3] = {0.9, 0.9, 0.9};
    draw_row(d, t, ls, rh, grey);
}

void pdoc_table_row(pdoc *d, const ptable *t, const char *const *cells, const double *fill,
                    bool bold_first)
{
    PangoLayout *ls[32];
    if (t->ncols > 32)
        return;
    double rh = row_height(d, t, cells, bold_first, false, ls);
    if (d->y + rh > d->h - d->bottom) {
        for (size_t c = 0; c < t->ncols; c++)
            g_object_unref(ls[c]);
        pdoc_new_page(d);
        pdoc_table_head(d, t);
        rh = row_height(d, t, cells, bold_first, false, ls);
    }
    draw_row(d, t, ls, rh, fill);
}

void pdoc_figure(pdoc *d, double w, double h, pdoc_draw_fn draw, const void *ctx)
{
    pdoc_need(d, h + 6);
    cairo_save(d->cr);
    cairo_translate(d->cr, d->left, d->y);
    cairo_rectangle(d->cr, 0, 0, w, h);
    cairo_clip(d->cr);
    draw(d->cr, w, h, ctx);
    cairo_restore(d->cr);
    d->y += h + 6;
}

void pdoc_end(pdoc *d)
{
    if (d->cr) {
        cairo_show_page(d->cr);
        cairo_destroy(d->cr);
        d->cr = NULL;
    }
    if (d->surface) {
        cairo_surface_finish(d->surface);
        if (cairo_surface_status(d->surface) != CAIRO_STATUS_SUCCESS)
            d->failed = true;
        cairo_surface_destroy(d->surface);
        d->surface = NULL;
    }
}

void pdoc_free(pdoc *d)
{
    pdoc_end(d);
    sl_buf_free(&d->out);
}

sl_status pdoc_render(pdoc *d, const char *paper, pdoc_compose_fn compose, const void *ctx,
                      unsigned char **pdf, size_t *len, sl_error *err)
{
    *pdf = NULL;
    *len = 0;
    double w, h;
    pdoc_paper(paper, &w, &h);
    int total = 0;
    for (int pass = 0; pass < 2; pass++) {
        if (!pdoc_begin(d, w, h, total)) {
            pdoc_free(d);
            return sl_error_set(err, SL_EINTERNAL, "cannot start the PDF (cairo)");
        }
        compose(d, ctx);
        total = d->page;
        pdoc_end(d);
    }
    if (d->failed || d->out.failed || !d->out.len) {
        pdoc_free(d);
        return sl_error_set(err, SL_ENOMEM, "cannot write the PDF (cairo)");
    }
    *pdf = (unsigned char *)d->out.data;
    *len = d->out.len;
    return SL_OK;
}
