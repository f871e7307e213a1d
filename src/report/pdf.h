/*
 * A small page typesetter over cairo and Pango, private to the report stage:
 * paragraphs, headings that never end a page, tables whose header repeats
 * on every page they cross, boxes, and figures drawn by the figure code.
 * Every page carries the running head (patient, plan) and the foot (date,
 * "page n of m"); the page count is known because a document is laid out
 * twice, the first time onto a surface that discards its output.
 */
#ifndef STRAYLINE_REPORT_PDF_H
#define STRAYLINE_REPORT_PDF_H

#include <cairo.h>
#include <pango/pangocairo.h>
#include <stdbool.h>
#include <stddef.h>

#include "strayline/error.h"
#include "strayline/util.h"

typedef struct pdoc {
    cairo_surface_t *surface;
    cairo_t *cr;
    double w, h;              /* page size (pt) */
    double left, right, top, bottom;
    double y;                 /* where the next block starts */
    int page;                 /* 1-based, 0 before the first page */
    int total;                /* pages of the first pass; 0 during it */
    char head_left[300], head_right[300], foot_left[300];
    sl_buf out;               /* the PDF bytes (second pass) */
    bool failed;
} pdoc;

/* A4 or Letter, in points. */
void pdoc_paper(const char *paper, double *w, double *h);

/* Start a pass: total = 0 for the counting pass (output discarded), the
 * first pass's page count for the real one. */
bool pdoc_begin(pdoc *d, double w, double h, int total);
/* Finish the pass; after the real pass d->out holds the PDF. */
void pdoc_end(pdoc *d);
void pdoc_free(pdoc *d);

/* The whole document: paper ("a4" or "letter"), the running head and foot
 * already set in d, compose called once a pass, and on success the PDF's
 * bytes handed over in pdf/len (the caller frees them). Every report's PDF
 * is made so, whatever it composes. */
typedef void (*pdoc_compose_fn)(pdoc *d, const void *ctx);
sl_status pdoc_render(pdoc *d, const char *paper, pdoc_compose_fn compose, const void *ctx,
                      unsigned char **pdf, size_t *len, sl_error *err);

void pdoc_new_page(pdoc *d);
/* Make room for `need` points, starting a new page if they do not fit. */
void pdoc_need(pdoc *d, double need);

/* Text blocks. size in pt; markup is Pango markup (escape user text with
 * g_markup_escape_text). */
void pdoc_heading(pdoc *d, const char *text, double size);
void pdoc_para(pdoc *d, const char *text, double size, bool bold);
void pdoc_markup(pdoc *d, const char *markup, double size);
/* A framed block of lines (a banner): border width in pt, fill grey 0..1. */
void pdoc_banner(pdoc *d, const char *text, double size, double border, double r, double g,
                 double b, bool dashed);

/* Tables: widths are fractions of the text width and sum to 1. */
typedef struct ptable {
    size_t ncols;
    const double *widths;
    const char *const *head;
    double size;
} ptable;
void pdoc_table_head(pdoc *d, const ptable *t);
/* One row; fill NULL or an rgb triple for the row's background. The
 * header repeats when the row moves to a new page. */
void pdoc_table_row(pdoc *d, const ptable *t, const char *const *cells, const double *fill,
                    bool bold_first);

/* A figure: `draw` paints into w x h points at the current position. */
typedef void (*pdoc_draw_fn)(cairo_t *cr, double w, double h, const void *ctx);
void pdoc_figure(pdoc *d, double w, double h, pdoc_draw_fn draw, const void *ctx);

/* Space between blocks. */
void pdoc_skip(pdoc *d, double pt);

#endif
