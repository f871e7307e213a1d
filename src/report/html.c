/*
 * HTML documents over libxml2 (see html.h); figures are figure.c's.
 */
#include "html.h"

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
    "@media print{body{max-width:none;margin:0;font-size:9.5pt}"
    "h2,h3{break-after:avoid}section,figure,table,svg{break-inside:avoid}"
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

/* The text is formatted at its full length: a paragraph naming many
 * organs is never cut. */
xmlNodePtr helf(hdoc *h, xmlNodePtr parent, const char *name, const char *fmt, ...)
{
    va_list ap;
    va_start(ap, fmt);
    int n = vsnprintf(NULL, 0, fmt, ap);
    va_end(ap);
    char *buf = n >= 0 ? malloc((size_t)n + 1) : NULL;
    if (!buf) {
        h->failed = true;
        return NULL;
    }
    va_start(ap, fmt);
    vsnprintf(buf, (size_t)n + 1, fmt, ap);
    va_end(ap);
    xmlNodePtr el = hel(h, parent, name, buf);
    free(buf);
    return el;
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
