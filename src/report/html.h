/*
 * Private helpers of the HTML writers: documents are built as a libxml2 HTML
 * tree, so that escaping and serialisation are the library's, never ours;
 * pictures are inline SVG elements of the same tree (drawn by cairo, see
 * figure.h), so a report is one self-contained file with no external
 * reference.
 */
#ifndef STRAYLINE_REPORT_HTML_H
#define STRAYLINE_REPORT_HTML_H

#include <stdbool.h>
#include <stdio.h>

#include <libxml/HTMLtree.h>
#include <libxml/tree.h>

#include "strayline/error.h"

typedef struct hdoc {
    htmlDocPtr doc;
    xmlNodePtr head, body;
    bool failed;
    unsigned nfig; /* figures so far: each gets its own id prefix */
} hdoc;

/* A document with a title and a style sheet (screen and print rules). */
bool hdoc_new(hdoc *h, const char *title, const char *css);
/* Serialise to fp and free the tree. */
sl_status hdoc_write(hdoc *h, FILE *fp, sl_error *err);
void hdoc_free(hdoc *h);

/* An element under parent, with optional text content (escaped). */
xmlNodePtr hel(hdoc *h, xmlNodePtr parent, const char *name, const char *text);
xmlNodePtr helf(hdoc *h, xmlNodePtr parent, const char *name, const char *fmt, ...)
#if defined(__GNUC__)
    __attribute__((format(printf, 4, 5)))
#endif
    ;
void hattr(hdoc *h, xmlNodePtr n, const char *key, const char *value);
void hattrf(hdoc *h, xmlNodePtr n, const char *key, const char *fmt, ...)
#if defined(__GNUC__)
    __attribute__((format(printf, 4, 5)))
#endif
    ;
void htext(hdoc *h, xmlNodePtr n, const char *text);

/* A table row of cells (th when header). */
xmlNodePtr hrow(hdoc *h, xmlNodePtr table, bool header, const char *const *cells, size_t n);

/* The shared style sheet of strayline's reports. */
extern const char sl_report_css[];

#endif
