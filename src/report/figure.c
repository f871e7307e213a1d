/*
 * The figure machinery shared by every figure (see figure.h): rendering a
 * drawing function to SVG with cairo's SVG surface and taking the result
 * into the HTML tree with libxml2, text with Pango, plot axes, numbers
 * without exponents, and the status colours.
 *
 * cairo names its SVG definitions glyph0-1, clip1, surface5 and so on, the
 * same in every document it writes; an HTML page with several figures would
 * then resolve a reference of one figure to another's definition. Some of
 * those numbers come from counters of the whole process, so that the same
 * report drawn twice would differ. Each id is therefore the figure's number
 * in the page, cairo's kind of definition and the definition's place in the
 * figure, and every reference is rewritten to match.
 *
 * Text in an HTML figure is SVG text, not glyph outlines: cairo's SVG
 * surface writes every glyph's outline and a reference per glyph, which made
 * the text most of each figure's bytes and most of the time a report took
 * to write. fig_text, drawing into a figure meant for the HTML, records the
 * text, its place, font and colour, and fills its box in a marker colour;
 * fig_svg_into then puts a text element where cairo wrote the marker, so
 * that the text keeps its place in the drawing order and inside any clip.
 * The text is given Pango's width (textLength), so that a viewer without
 * the font still lays it out as measured. Text cairo would not draw as one
 * solid run (an ellipsis, a pattern source, a group) is drawn as glyphs, and
 * a figure whose markers do not all come back is drawn again with glyphs.
 */
#include "figure.h"

#include <math.h>
#include <stdarg.h>
#include <stdint.h>
#include <stdlib.h>
#include <string.h>

#include <cairo-svg.h>
#include <fontconfig/fontconfig.h>
#include <libxml/parser.h>
#include <pango/pangocairo.h>

/* ------------------------------------------------------------ status -- */

void fig_status_rgb(sl_status_kind s, double rgb[3])
{
    /* dark, well-separated hues that stay apart for the common colour
     * vision deficiencies, paired with a shape (fig_status_symbol) */
    static const double c[][3] = {
        [SL_ST_BELOW] = {0.00, 0.55, 0.40},        /* green */
        [SL_ST_MAY_EXCEED] = {0.85, 0.50, 0.00},   /* orange */
        [SL_ST_EXCEEDS] = {0.78, 0.08, 0.10},      /* red */
        [SL_ST_BAND] = {0.60, 0.25, 0.60},         /* purple */
        [SL_ST_NO_LEVEL] = {0.10, 0.40, 0.70},     /* blue */
        [SL_ST_IN_FIELD] = {0.25, 0.25, 0.25},     /* near black */
        [SL_ST_NOT_ASSESSED] = {0.55, 0.55, 0.55}, /* grey */
    };
    size_t i = (size_t)s < sizeof c / sizeof *c ? (size_t)s : SL_ST_NOT_ASSESSED;
    memcpy(rgb, c[i], sizeof c[i]);
}

const char *fig_status_symbol(sl_status_kind s)
{
    switch (s) {
    case SL_ST_EXCEEDS: return "\u25B2";      /* black up-pointing triangle */
    case SL_ST_MAY_EXCEED: return "\u25C6";   /* black diamond */
    case SL_ST_BELOW: return "\u25CF";        /* black circle */
    case SL_ST_BAND: return "\u25A0";         /* black square */
    case SL_ST_NO_LEVEL: return "\u25CB";     /* white circle */
    case SL_ST_IN_FIELD: return "\u25A3";     /* square in square */
    case SL_ST_NOT_ASSESSED: return "\u25A1"; /* white square */
    }
    return "\u25A1";
}

/* ----------------------------------------------------------- numbers -- */

/* v with dec decimals, trailing zeros after the point dropped (0.50 -> 0.5,
 * 10.0 -> 10), never "-0". */
static void fixed_trimmed(char *buf, size_t size, double v, int dec)
{
    snprintf(buf, size, "%.*f", dec, v);
    /* drop trailing zeros after a decimal point: 0.50 -> 0.5, 10.0 -> 10 */
    char *dot = strchr(buf, '.');
    if (dot) {
        char *e = buf + strlen(buf) - 1;
        while (e > dot && *e == '0')
            *e-- = '\0';
        if (e == dot)
            *e = '\0';
    }
    if (strcmp(buf, "-0") == 0)
        snprintf(buf, size, "0");
}

void fig_format_number(double v, char *buf, size_t size)
{
    if (!isfinite(v)) {
        snprintf(buf, size, "-");
        return;
    }
    double a = fabs(v);
    int dec;
    if (a == 0 || a >= 100)
        dec = 0;
    else
        dec = (int)fmax(0, 1 - floor(log10(a))); /* two significant figures at least */
    if (dec > 9)
        dec = 9;
    fixed_trimmed(buf, size, v, dec);
}

/* ------------------------------------------------------------ counts -- */

typedef struct fig_counts {
    char *s;
    size_t len, cap;
    bool failed;
} fig_counts;

static const cairo_user_data_key_t counts_key;

static void counts_free(void *p)
{
    fig_counts *c = p;
    if (c)
        free(c->s);
    free(c);
}

void fig_count(cairo_t *cr, const char *key, const char *fmt, ...)
{
    fig_counts *c = cairo_surface_get_user_data(cairo_get_target(cr), &counts_key);
    if (!c || c->failed)
        return; /* not rendering for a test-visible SVG: nothing to record */
    char val[1024];
    va_list ap;
    va_start(ap, fmt);
    vsnprintf(val, sizeof val, fmt, ap);
    va_end(ap);
    size_t need = c->len + strlen(key) + strlen(val) + 3;
    if (need > c->cap) {
        size_t cap = need * 2;
        char *s = realloc(c->s, cap);
        if (!s) {
            c->failed = true;
            return;
        }
        c->s = s;
        c->cap = cap;
    }
    c->len += (size_t)snprintf(c->s + c->len, c->cap - c->len, "%s%s=%s", c->len ? " " : "",
                               key, val);
}

/* ---------------------------------------------------------- SVG text -- */

/* A marker is a fill of this opacity, which no figure draws with; its colour
 * carries the index of the text it stands for (24 bits, one byte a
 * channel), so that a marker cairo left out (text outside the figure) costs
 * nothing but that text. */
#define MARK_ALPHA 0.0123
static const char mark_opacity[] = "fill-opacity:0.0123;";
#define TEXT_MAX_ITEMS (1u << 24)

typedef struct text_line {
    char *text;
    double x, y, w; /* start of the baseline and advance width, in the text's space */
} text_line;

typedef struct text_item {
    cairo_matrix_t m; /* the text's space (origin at the layout's top left) to the figure's */
    double size_pt;
    bool bold, italic;
    double rgba[4];
    size_t nlines;
    text_line *lines;
} text_item;

typedef struct text_sink {
    text_item *v;
    size_t n, cap;
    bool failed;
} text_sink;

static const cairo_user_data_key_t text_key;

static void text_sink_free(void *p)
{
    text_sink *ts = p;
    if (!ts)
        return;
    for (size_t i = 0; i < ts->n; i++) {
        for (size_t k = 0; k < ts->v[i].nlines; k++)
            free(ts->v[i].lines[k].text);
        free(ts->v[i].lines);
    }
    free(ts->v);
    free(ts);
}

/* n bytes of a layout's text as XML takes them: control characters as
 * spaces (they are not allowed in XML). */
static void copy_visible(char *dst, const char *src, size_t n)
{
    for (size_t i = 0; i < n; i++) {
        unsigned char c = (unsigned char)src[i];
        dst[i] = c < 0x20 || c == 0x7f ? ' ' : (char)c;
    }
}

/* One line of a layout as plain text: its bytes without the trailing white
 * space (its width then ends where that space begins), control characters
 * as spaces (they are not allowed in XML). */
static bool text_line_take(PangoLayoutLine *line, const char *all, int base_pu, double x_pu,
                           text_line *out)
{
    int start = line->start_index, len = line->length;
    while (len > 0 && (all[start + len - 1] == ' ' || all[start + len - 1] == '\n' ||
                       all[start + len - 1] == '\r' || all[start + len - 1] == '\t'))
        len--;
    out->text = malloc((size_t)len + 1);
    if (!out->text)
        return false;
    copy_visible(out->text, all + start, (size_t)len);
    out->text[len] = '\0';
    int end_x = 0;
    pango_layout_line_index_to_x(line, start + len, 0, &end_x);
    int start_x = 0;
    pango_layout_line_index_to_x(line, start, 0, &start_x);
    out->x = (x_pu + start_x) / PANGO_SCALE;
    out->y = (double)base_pu / PANGO_SCALE;
    out->w = (double)(end_x - start_x) / PANGO_SCALE;
    return true;
}

/* The one line of a layout cut with an ellipsis, as the text Pango shows:
 * each run's slice of the text in order, the ellipsis run as the
 * character(s) it holds (one glyph: U+2026; otherwise three full stops).
 * False, and nothing in out, for a line Pango would draw right to left
 * (its runs are in visual order) or when out of memory; the caller then
 * draws glyphs. The width is the line's own (an ellipsis leaves no
 * trailing space). Drawing such a label as glyph outlines made its figure
 * a quarter of a report's drawing time. */
static bool text_line_ellipsized(PangoLayoutLine *line, const char *all, int base_pu,
                                 const PangoRectangle *lr, text_line *out)
{
    size_t len = 0;
    for (GSList *r = line->runs; r; r = r->next) {
        const PangoGlyphItem *run = r->data;
        if (run->item->analysis.level % 2)
            return false;
        len += run->item->analysis.flags & PANGO_ANALYSIS_FLAG_IS_ELLIPSIS
                   ? 3
                   : (size_t)run->item->length;
    }
    char *t = malloc(len + 1);
    if (!t)
        return false;
    size_t k = 0;
    for (GSList *r = line->runs; r; r = r->next) {
        const PangoGlyphItem *run = r->data;
        if (run->item->analysis.flags & PANGO_ANALYSIS_FLAG_IS_ELLIPSIS) {
            const char *e = run->glyphs->num_glyphs == 1 ? "\u2026" : "...";
            memcpy(t + k, e, strlen(e));
            k += strlen(e);
            continue;
        }
        copy_visible(t + k, all + run->item->offset, (size_t)run->item->length);
        k += (size_t)run->item->length;
    }
    t[k] = '\0';
    out->text = t;
    out->x = (double)lr->x / PANGO_SCALE;
    out->y = (double)base_pu / PANGO_SCALE;
    out->w = (double)lr->width / PANGO_SCALE;
    return true;
}

/* ------------------------------------------------------- text shapes -- */

/* What Pango made of one text, as a figure for the HTML takes it: the
 * layout's size and extents, and its lines as SVG text. The same labels
 * (tick values, axis titles, organ names) come back in every figure and
 * every plan of a scan, and shaping them again was most of the time Pango
 * took; the shapes are kept, keyed by everything the layout depends on:
 * the text, the font, the width rule and the linear part of the
 * transformation (Pango takes the matrix without its translation). The
 * figure is then byte for byte the one a fresh layout gives. Kept only
 * while a figure's text goes to SVG text (a text sink is set): glyphs, for
 * the PDF or a figure drawn again, always come from a layout. */
typedef struct text_shape {
    char *text; /* the key: the text as given, the font, max_w and matrix */
    double size_pt, max_w, m[4];
    bool bold, italic;
    int iw, ih; /* pango_layout_get_size */
    bool ellipsized;
    PangoRectangle ink, logical;
    int nchars;
    size_t nlines; /* 0 when nothing would be seen, or its ellipsis cannot be text */
    text_line *lines;
    struct text_shape *next;
} text_shape;

#define SHAPE_BUCKETS 1024
#define SHAPE_MAX 8192 /* then the kept shapes are dropped and kept afresh */
static GMutex shapes_lock;
static text_shape *shapes[SHAPE_BUCKETS];
static size_t nshapes;

static void lines_free(text_line *lines, size_t n)
{
    for (size_t k = 0; k < n; k++)
        free(lines[k].text);
    free(lines);
}

static void shapes_clear(void)
{
    for (size_t b = 0; b < SHAPE_BUCKETS; b++) {
        while (shapes[b]) {
            text_shape *s = shapes[b];
            shapes[b] = s->next;
            free(s->text);
            lines_free(s->lines, s->nlines);
            free(s);
        }
    }
    nshapes = 0;
}

static uint64_t shape_hash(const text_shape *k)
{
    uint64_t h = 1469598103934665603u; /* FNV-1a */
    for (const unsigned char *p = (const unsigned char *)k->text; *p; p++)
        h = (h ^ *p) * 1099511628211u;
    const double v[6] = {k->size_pt, k->max_w, k->m[0], k->m[1], k->m[2], k->m[3]};
    for (int i = 0; i < 6; i++) {
        uint64_t bits;
        memcpy(&bits, &v[i], sizeof bits);
        h = (h ^ bits) * 1099511628211u;
    }
    return (h ^ (uint64_t)(k->bold * 2 + k->italic)) * 1099511628211u;
}

static bool shape_same(const text_shape *a, const text_shape *b)
{
    return a->size_pt == b->size_pt && a->max_w == b->max_w && a->m[0] == b->m[0] &&
           a->m[1] == b->m[1] && a->m[2] == b->m[2] && a->m[3] == b->m[3] &&
           a->bold == b->bold && a->italic == b->italic && strcmp(a->text, b->text) == 0;
}

/* The layout's shape into s (its key already set); false when out of memory. */
static bool shape_from_layout(PangoLayout *l, text_shape *s)
{
    pango_layout_get_size(l, &s->iw, &s->ih);
    s->ellipsized = pango_layout_is_ellipsized(l);
    pango_layout_get_extents(l, &s->ink, &s->logical);
    s->nchars = pango_layout_get_character_count(l);
    s->nlines = 0;
    s->lines = NULL;
    if (s->logical.width <= 0 || s->logical.height <= 0 || s->nchars == 0)
        return true;
    const char *all = pango_layout_get_text(l);
    if (s->ellipsized) {
        /* one line (an ellipsis cuts a single line) */
        PangoLayoutIter *it = pango_layout_get_line_count(l) == 1 ? pango_layout_get_iter(l)
                                                                  : NULL;
        s->lines = it ? calloc(1, sizeof *s->lines) : NULL;
        if (s->lines) {
            PangoRectangle lr;
            pango_layout_iter_get_line_extents(it, NULL, &lr);
            if (text_line_ellipsized(pango_layout_iter_get_line_readonly(it), all,
                                     pango_layout_iter_get_baseline(it), &lr, s->lines))
                s->nlines = 1;
        }
        if (it)
            pango_layout_iter_free(it);
        if (!s->nlines) {
            free(s->lines);
            s->lines = NULL;
        }
        return true; /* no lines: drawn as glyphs */
    }
    s->lines = calloc((size_t)pango_layout_get_line_count(l), sizeof *s->lines);
    PangoLayoutIter *iter = s->lines ? pango_layout_get_iter(l) : NULL;
    if (!iter) {
        free(s->lines);
        s->lines = NULL;
        return false;
    }
    bool ok = true;
    do {
        PangoRectangle lr;
        pango_layout_iter_get_line_extents(iter, NULL, &lr);
        if (!text_line_take(pango_layout_iter_get_line_readonly(iter), all,
                            pango_layout_iter_get_baseline(iter), lr.x, &s->lines[s->nlines])) {
            ok = false;
            break;
        }
        s->nlines++;
    } while (pango_layout_iter_next_line(iter));
    pango_layout_iter_free(iter);
    if (!ok) {
        lines_free(s->lines, s->nlines);
        s->lines = NULL;
        s->nlines = 0;
    }
    return ok;
}

/* A copy of s into out, its lines too when lines is set. */
static bool shape_copy(const text_shape *s, text_shape *out, bool lines)
{
    *out = *s;
    out->text = NULL;
    out->next = NULL;
    out->lines = NULL;
    out->nlines = 0;
    if (!lines || !s->nlines)
        return true;
    out->lines = calloc(s->nlines, sizeof *out->lines);
    if (!out->lines)
        return false;
    for (size_t k = 0; k < s->nlines; k++) {
        out->lines[k] = s->lines[k];
        out->lines[k].text = strdup(s->lines[k].text);
        if (!out->lines[k].text) {
            lines_free(out->lines, k);
            out->lines = NULL;
            return false;
        }
        out->nlines++;
    }
    return true;
}

static PangoLayout *layout_for(cairo_t *cr, const char *text, fig_font f, double max_w);

/* The shape of a text as the context would lay it out (a copy: the caller
 * frees its lines), from the kept ones or from a layout, which is then
 * kept. False when out of memory. */
static bool shape_get(cairo_t *cr, const char *text, fig_font f, double max_w, bool lines,
                      text_shape *out)
{
    cairo_matrix_t cm;
    cairo_get_matrix(cr, &cm);
    text_shape key = {.text = (char *)text, .size_pt = f.size_pt, .max_w = max_w,
                      .m = {cm.xx, cm.yx, cm.xy, cm.yy}, .bold = f.bold, .italic = f.italic};
    size_t b = (size_t)(shape_hash(&key) % SHAPE_BUCKETS);
    bool ok = false, found = false;
    g_mutex_lock(&shapes_lock);
    for (const text_shape *s = shapes[b]; s && !found; s = s->next) {
        if (shape_same(s, &key)) {
            found = true;
            ok = shape_copy(s, out, lines);
        }
    }
    g_mutex_unlock(&shapes_lock);
    if (found)
        return ok;
    PangoLayout *l = layout_for(cr, text, f, max_w);
    text_shape *s = l ? calloc(1, sizeof *s) : NULL;
    if (!s)
        return false;
    *s = key;
    s->text = strdup(text);
    if (!s->text || !shape_from_layout(l, s)) {
        free(s->text);
        free(s);
        return false;
    }
    ok = shape_copy(s, out, lines);
    g_mutex_lock(&shapes_lock);
    if (nshapes >= SHAPE_MAX)
        shapes_clear();
    s->next = shapes[b];
    shapes[b] = s;
    nshapes++;
    g_mutex_unlock(&shapes_lock);
    return ok;
}

static text_sink *sink_of(cairo_t *cr)
{
    text_sink *ts = cairo_surface_get_user_data(cairo_get_target(cr), &text_key);
    return ts && !ts->failed ? ts : NULL;
}

/* Record a text of this shape drawn at (x0, y0) as SVG text and fill its
 * box with its marker; false when it must be drawn as glyphs instead. The
 * sink takes the shape's lines when it records them. */
static bool text_to_sink(cairo_t *cr, text_sink *ts, text_shape *sh, double x0, double y0,
                         fig_font f)
{
    if ((sh->ellipsized && !sh->nlines) || ts->n >= TEXT_MAX_ITEMS)
        return false;
    double rgba[4];
    if (cairo_pattern_get_rgba(cairo_get_source(cr), &rgba[0], &rgba[1], &rgba[2], &rgba[3]) !=
        CAIRO_STATUS_SUCCESS)
        return false;
    const PangoRectangle ink = sh->ink, logical = sh->logical;
    if (logical.width <= 0 || logical.height <= 0 || sh->nchars == 0)
        return true; /* nothing to see */
    if (ts->n == ts->cap) {
        size_t cap = ts->cap ? ts->cap * 2 : 64;
        text_item *v = realloc(ts->v, cap * sizeof *v);
        if (!v) {
            ts->failed = true;
            return false;
        }
        ts->v = v;
        ts->cap = cap;
    }
    text_item *it = &ts->v[ts->n];
    memset(it, 0, sizeof *it);
    cairo_get_matrix(cr, &it->m);
    cairo_matrix_translate(&it->m, x0, y0);
    it->size_pt = f.size_pt;
    it->bold = f.bold;
    it->italic = f.italic;
    memcpy(it->rgba, rgba, sizeof rgba);
    it->lines = sh->lines;
    it->nlines = sh->nlines;
    sh->lines = NULL;
    sh->nlines = 0;
    size_t idx = ts->n++;
    /* the marker covers what the glyphs would: cairo clips it (and so the
     * text that replaces it) as it would have clipped them */
    int x1 = ink.x < logical.x ? ink.x : logical.x, y1 = ink.y < logical.y ? ink.y : logical.y;
    int x2 = ink.x + ink.width > logical.x + logical.width ? ink.x + ink.width
                                                            : logical.x + logical.width;
    int y2 = ink.y + ink.height > logical.y + logical.height ? ink.y + ink.height
                                                              : logical.y + logical.height;
    cairo_save(cr);
    cairo_new_path(cr);
    cairo_rectangle(cr, x0 + (double)x1 / PANGO_SCALE, y0 + (double)y1 / PANGO_SCALE,
                    (double)(x2 - x1) / PANGO_SCALE, (double)(y2 - y1) / PANGO_SCALE);
    cairo_set_source_rgba(cr, (double)(idx & 0xff) / 255, (double)((idx >> 8) & 0xff) / 255,
                          (double)((idx >> 16) & 0xff) / 255, MARK_ALPHA);
    cairo_fill(cr);
    cairo_restore(cr);
    return true;
}

/* The index a path's style names if it is a marker: -1 when it is not one,
 * -2 when it looks like one but cannot be read. */
static long marker_index(const char *style)
{
    if (!strstr(style, mark_opacity))
        return -1;
    const char *p = strstr(style, "fill:rgb(");
    if (!p)
        return -2;
    p += strlen("fill:rgb(");
    long idx = 0;
    for (int k = 0; k < 3; k++) {
        char *end;
        double pc = strtod(p, &end);
        if (end == p || *end != '%')
            return -2;
        double byte = pc * 2.55;
        long b = lround(byte);
        if (fabs(byte - (double)b) > 0.01 || b < 0 || b > 255)
            return -2;
        idx |= b << (8 * k);
        p = end + 1;
        if (k < 2 && *p++ != ',')
            return -2;
    }
    return idx;
}

/* Text as ASCII runs and character references: the HTML writer would turn
 * other characters into HTML's named entities, which an SVG read as XML (a
 * figure saved on its own) does not know. The text is valid UTF-8 (Pango's
 * layout holds it). */
static bool add_text_content(xmlNodePtr t, const char *s)
{
    while (*s) {
        size_t run = 0;
        while (s[run] && (unsigned char)s[run] < 0x80)
            run++;
        if (run) {
            xmlNodePtr tx = xmlNewDocTextLen(t->doc, BAD_CAST s, (int)run);
            if (!tx)
                return false;
            xmlAddChild(t, tx);
            s += run;
            continue;
        }
        int len = 4;
        int cp = xmlGetUTF8Char((const unsigned char *)s, &len);
        if (cp < 0 || len <= 0)
            return false;
        char ref[16];
        snprintf(ref, sizeof ref, "#%d", cp);
        xmlNodePtr r = xmlNewCharRef(t->doc, BAD_CAST ref);
        if (!r)
            return false;
        xmlAddChild(t, r);
        s += len;
    }
    return true;
}

static xmlNodePtr text_node(xmlDocPtr doc, xmlNsPtr ns, const text_item *it)
{
    char style[256], n1[32], n2[32], n3[32], n4[32], n5[32], n6[32];
    fixed_trimmed(n1, sizeof n1, it->size_pt, 2);
    fixed_trimmed(n2, sizeof n2, it->rgba[0] * 100, 1);
    fixed_trimmed(n3, sizeof n3, it->rgba[1] * 100, 1);
    fixed_trimmed(n4, sizeof n4, it->rgba[2] * 100, 1);
    fixed_trimmed(n5, sizeof n5, it->rgba[3], 3);
    snprintf(style, sizeof style,
             "font-family:'DejaVu Sans',sans-serif;font-size:%spx;%s%sfill:rgb(%s%%,%s%%,%s%%);"
             "%s%s%swhite-space:pre",
             n1, it->bold ? "font-weight:bold;" : "", it->italic ? "font-style:italic;" : "", n2,
             n3, n4, it->rgba[3] < 1 ? "fill-opacity:" : "", it->rgba[3] < 1 ? n5 : "",
             it->rgba[3] < 1 ? ";" : "");
    /* a translation alone folds into x and y */
    const cairo_matrix_t *m = &it->m;
    bool moved_only = m->xx == 1 && m->yx == 0 && m->xy == 0 && m->yy == 1;
    char tf[200] = "";
    if (!moved_only) {
        char a[6][32];
        const double mv[6] = {m->xx, m->yx, m->xy, m->yy, m->x0, m->y0};
        for (int k = 0; k < 6; k++)
            fixed_trimmed(a[k], sizeof a[k], mv[k], k < 4 ? 5 : 2);
        snprintf(tf, sizeof tf, "matrix(%s,%s,%s,%s,%s,%s)", a[0], a[1], a[2], a[3], a[4], a[5]);
    }
    xmlNodePtr group = NULL;
    if (it->nlines > 1) {
        group = xmlNewDocNode(doc, ns, BAD_CAST "g", NULL);
        if (!group)
            return NULL;
        if (*tf)
            xmlNewProp(group, BAD_CAST "transform", BAD_CAST tf);
    }
    xmlNodePtr first = NULL;
    for (size_t k = 0; k < it->nlines; k++) {
        const text_line *ln = &it->lines[k];
        if (!*ln->text)
            continue;
        xmlNodePtr t = xmlNewDocNode(doc, ns, BAD_CAST "text", NULL);
        if (!t) {
            xmlFreeNode(group);
            xmlFreeNode(first);
            return NULL;
        }
        fixed_trimmed(n1, sizeof n1, ln->x + (moved_only ? m->x0 : 0), 2);
        fixed_trimmed(n2, sizeof n2, ln->y + (moved_only ? m->y0 : 0), 2);
        fixed_trimmed(n6, sizeof n6, ln->w, 2);
        xmlNewProp(t, BAD_CAST "x", BAD_CAST n1);
        xmlNewProp(t, BAD_CAST "y", BAD_CAST n2);
        if (*tf && !group)
            xmlNewProp(t, BAD_CAST "transform", BAD_CAST tf);
        xmlNewProp(t, BAD_CAST "style", BAD_CAST style);
        if (ln->w > 0) {
            xmlNewProp(t, BAD_CAST "textLength", BAD_CAST n6);
            xmlNewProp(t, BAD_CAST "lengthAdjust", BAD_CAST "spacingAndGlyphs");
        }
        if (!add_text_content(t, ln->text)) {
            xmlFreeNode(t);
            xmlFreeNode(group);
            xmlFreeNode(first);
            return NULL;
        }
        if (group)
            xmlAddChild(group, t);
        else
            first = t;
    }
    if (group)
        return group;
    return first ? first : xmlNewDocNode(doc, ns, BAD_CAST "g", NULL);
}

/* Put each recorded text where cairo wrote its marker. */
static bool place_texts(xmlNodePtr n, const text_sink *ts, bool *used)
{
    for (xmlNodePtr next; n; n = next) {
        next = n->next;
        if (n->type != XML_ELEMENT_NODE)
            continue;
        if (xmlStrcmp(n->name, BAD_CAST "path") == 0) {
            xmlChar *st = xmlGetProp(n, BAD_CAST "style");
            long idx = st ? marker_index((const char *)st) : -1;
            xmlFree(st);
            if (idx == -2 || idx >= (long)ts->n || (idx >= 0 && used[idx]))
                return false;
            if (idx >= 0) {
                used[idx] = true;
                xmlNodePtr t = text_node(n->doc, n->ns, &ts->v[idx]);
                if (!t)
                    return false;
                xmlReplaceNode(n, t);
                xmlFreeNode(n);
                continue;
            }
        }
        if (!place_texts(n->children, ts, used))
            return false;
    }
    return true;
}

/* --------------------------------------------------------------- SVG -- */

typedef struct membuf {
    char *p;
    size_t len, cap;
} membuf;

static cairo_status_t membuf_write(void *closure, const unsigned char *data, unsigned int n)
{
    membuf *b = closure;
    if (b->len + n + 1 > b->cap) {
        size_t cap = (b->len + n + 1) * 2;
        char *p = realloc(b->p, cap);
        if (!p)
            return CAIRO_STATUS_WRITE_ERROR;
        b->p = p;
        b->cap = cap;
    }
    memcpy(b->p + b->len, data, n);
    b->len += n;
    b->p[b->len] = '\0';
    return CAIRO_STATUS_SUCCESS;
}

/* texts: NULL to draw text as glyphs; else it receives the texts the
 * drawing left as markers (the caller frees it with text_sink_free). */
static sl_status render_svg(double w, double h, fig_draw_fn draw, const void *ctx, char **svg,
                            size_t *len, char **counts, text_sink **texts, sl_error *err)
{
    membuf b = {0};
    *svg = NULL;
    *len = 0;
    if (counts)
        *counts = NULL;
    text_sink *ts = NULL;
    if (texts) {
        *texts = NULL;
        ts = calloc(1, sizeof *ts);
        if (!ts)
            return sl_error_set(err, SL_ENOMEM, "out of memory drawing a figure");
    }
    cairo_surface_t *s = cairo_svg_surface_create_for_stream(membuf_write, &b, w, h);
    fig_counts *c = calloc(1, sizeof *c);
    if (!c || cairo_surface_status(s) != CAIRO_STATUS_SUCCESS ||
        cairo_surface_set_user_data(s, &counts_key, c, counts_free) != CAIRO_STATUS_SUCCESS ||
        (ts && cairo_surface_set_user_data(s, &text_key, ts, NULL) != CAIRO_STATUS_SUCCESS)) {
        if (cairo_surface_status(s) == CAIRO_STATUS_SUCCESS && c &&
            cairo_surface_get_user_data(s, &counts_key) != c)
            free(c);
        cairo_surface_destroy(s);
        free(b.p);
        text_sink_free(ts);
        return sl_error_set(err, SL_ENOMEM, "out of memory drawing a figure");
    }
    cairo_svg_surface_restrict_to_version(s, CAIRO_SVG_VERSION_1_1);
    cairo_t *cr = cairo_create(s);
    cairo_save(cr);
    draw(cr, w, h, ctx);
    cairo_restore(cr);
    cairo_status_t cst = cairo_status(cr);
    cairo_destroy(cr);
    cairo_surface_finish(s);
    if (cst == CAIRO_STATUS_SUCCESS)
        cst = cairo_surface_status(s);
    bool cfail = c->failed;
    if (counts && c->s && !cfail) {
        *counts = c->s;
        c->s = NULL;
    }
    cairo_surface_destroy(s); /* frees c */
    if (ts && ts->failed) {
        /* a text could not be recorded: glyphs throughout */
        text_sink_free(ts);
        free(b.p);
        if (counts) {
            free(*counts);
            *counts = NULL;
        }
        return render_svg(w, h, draw, ctx, svg, len, counts, NULL, err);
    }
    if (cst != CAIRO_STATUS_SUCCESS || cfail || !b.p) {
        free(b.p);
        text_sink_free(ts);
        if (counts) {
            free(*counts);
            *counts = NULL;
        }
        return sl_error_set(err, cst == CAIRO_STATUS_NO_MEMORY || cfail ? SL_ENOMEM : SL_EINTERNAL,
                            "cannot draw a figure: %s", cairo_status_to_string(cst));
    }
    *svg = b.p;
    *len = b.len;
    if (texts)
        *texts = ts;
    return SL_OK;
}

sl_status fig_svg_string(double w_pt, double h_pt, fig_draw_fn draw, const void *ctx, char **svg,
                         size_t *len, sl_error *err)
{
    return render_svg(w_pt, h_pt, draw, ctx, svg, len, NULL, NULL, err);
}

/* A figure's ids: cairo's (v) and the figure's own (nv). */
typedef struct idset {
    char **v, **nv;
    size_t n, cap;
} idset;

/* The figure's id for cairo's id (n bytes), or NULL when it is not one. */
static const char *idset_new(const idset *s, const char *id, size_t n)
{
    for (size_t i = 0; i < s->n; i++)
        if (strlen(s->v[i]) == n && memcmp(s->v[i], id, n) == 0)
            return s->nv[i];
    return NULL;
}

static void idset_free(idset *s)
{
    for (size_t i = 0; i < s->n; i++) {
        free(s->v[i]);
        free(s->nv[i]);
    }
    free(s->v);
    free(s->nv);
}

/* Give every id the figure's prefix and a number by its place in the
 * document, keeping cairo's kind (glyph, clip, surface ...): cairo numbers
 * some definitions from counters shared by the whole process, so that the
 * same report drawn twice, or beside another on a second thread, would
 * carry other ids. Collect the old and the new ids. */
static bool prefix_ids(xmlNodePtr n, const char *prefix, idset *ids)
{
    for (; n; n = n->next) {
        if (n->type != XML_ELEMENT_NODE)
            continue;
        xmlChar *id = xmlGetProp(n, BAD_CAST "id");
        if (id) {
            if (ids->n == ids->cap) {
                size_t cap = ids->cap ? ids->cap * 2 : 64;
                char **v = realloc(ids->v, cap * sizeof *v);
                if (v)
                    ids->v = v;
                char **nv = v ? realloc(ids->nv, cap * sizeof *nv) : NULL;
                if (nv)
                    ids->nv = nv;
                if (!v || !nv) {
                    xmlFree(id);
                    return false;
                }
                ids->cap = cap;
            }
            const char *old = (const char *)id;
            size_t kind = 0;
            while ((old[kind] >= 'a' && old[kind] <= 'z') || (old[kind] >= 'A' && old[kind] <= 'Z'))
                kind++;
            size_t l = strlen(prefix) + (kind ? kind : 2) + 24;
            char *nid = malloc(l), *copy = strdup(old);
            if (!nid || !copy) {
                free(nid);
                free(copy);
                xmlFree(id);
                return false;
            }
            snprintf(nid, l, "%s%.*s%zu", prefix, (int)(kind ? kind : 2), kind ? old : "id",
                     ids->n + 1);
            ids->v[ids->n] = copy;
            ids->nv[ids->n] = nid;
            ids->n++;
            xmlSetProp(n, BAD_CAST "id", BAD_CAST nid);
            xmlFree(id);
        }
        if (!prefix_ids(n->children, prefix, ids))
            return false;
    }
    return true;
}

static bool idchar(char c)
{
    return (c >= 'a' && c <= 'z') || (c >= 'A' && c <= 'Z') || (c >= '0' && c <= '9') ||
           c == '-' || c == '_' || c == '.';
}

/* Rewrite "#id" references to ids of the set, in every attribute, to the
 * figure's ids. */
static bool rewrite_refs(xmlNodePtr n, const idset *ids)
{
    for (; n; n = n->next) {
        if (n->type != XML_ELEMENT_NODE)
            continue;
        for (xmlAttrPtr a = n->properties; a; a = a->next) {
            xmlChar *v = xmlNodeListGetString(n->doc, a->children, 1);
            if (!v)
                continue;
            const char *s = (const char *)v;
            if (!strchr(s, '#')) {
                xmlFree(v);
                continue;
            }
            size_t cap = strlen(s) * 2 + 64, len = 0;
            char *out = malloc(cap);
            if (!out) {
                xmlFree(v);
                return false;
            }
            for (size_t i = 0; s[i];) {
                if (s[i] == '#') {
                    size_t j = i + 1;
                    while (idchar(s[j]))
                        j++;
                    const char *nid = j > i + 1 ? idset_new(ids, s + i + 1, j - i - 1) : NULL;
                    if (nid) {
                        size_t nl = strlen(nid);
                        if (len + nl + 2 > cap) {
                            cap = (len + nl + 2) * 2;
                            char *o2 = realloc(out, cap);
                            if (!o2) {
                                free(out);
                                xmlFree(v);
                                return false;
                            }
                            out = o2;
                        }
                        out[len++] = '#';
                        memcpy(out + len, nid, nl);
                        len += nl;
                        i = j;
                        continue;
                    }
                }
                if (len + 2 > cap) {
                    cap *= 2;
                    char *o2 = realloc(out, cap);
                    if (!o2) {
                        free(out);
                        xmlFree(v);
                        return false;
                    }
                    out = o2;
                }
                out[len++] = s[i++];
            }
            out[len] = '\0';
            if (strcmp(out, s) != 0)
                xmlSetNsProp(n, a->ns, a->name, BAD_CAST out);
            free(out);
            xmlFree(v);
        }
        if (!rewrite_refs(n->children, ids))
            return false;
    }
    return true;
}

/* Write the numbers of a path's data with two decimals (a hundredth of a
 * point; cairo writes six), which halves a figure's size and changes no
 * pixel. Returns a new string or NULL. */
/* A plain decimal number of path data (optional sign, digits, optional
 * point and digits: how cairo writes coordinates) rounded to 2 decimals on
 * its digits (an exact tie to even, as printf's "%.2f"), trailing zeros
 * and a lone point dropped, "-0" as "0". Returns the length written to buf (at least 72 bytes), or 0 when
 * the token is not such a number (an exponent, say): the caller then goes
 * through strtod. Working on the digits avoids a strtod and a printf per
 * coordinate, which cost a tenth of a whole scan. */
static size_t round_plain(const char *t, size_t used, char *buf)
{
    size_t i = 0;
    bool neg = false;
    if (i < used && (t[i] == '-' || t[i] == '+'))
        neg = t[i++] == '-';
    char dig[72];
    size_t nd = 0, nint = 0;
    for (; i < used && t[i] >= '0' && t[i] <= '9'; i++, nint++)
        if (nd < 64)
            dig[nd++] = t[i];
    if (nint > 60)
        return 0;
    size_t nfrac = 0;
    char third = '0';
    bool beyond = false; /* a non-zero digit after the third decimal */
    if (i < used && t[i] == '.') {
        for (i++; i < used && t[i] >= '0' && t[i] <= '9'; i++, nfrac++) {
            if (nfrac < 2)
                dig[nd++] = t[i];
            else if (nfrac == 2)
                third = t[i];
            else
                beyond = beyond || t[i] != '0';
        }
    }
    if (i != used || nint + nfrac == 0)
        return 0;
    while (nfrac < 2) { /* pad to two decimals */
        dig[nd++] = '0';
        nfrac++;
    }
    /* dig holds the integer digits and two decimals; round on the third,
     * an exact tie to even as printf rounds it */
    bool up = third > '5' || (third == '5' && (beyond || (dig[nd - 1] - '0') % 2 == 1));
    if (up) {
        size_t k = nd;
        while (k > 0 && dig[k - 1] == '9')
            dig[--k] = '0';
        if (k == 0) {
            memmove(dig + 1, dig, nd);
            dig[0] = '1';
            nd++;
            nint++;
        } else {
            dig[k - 1]++;
        }
    }
    size_t ni = nd - 2, lead = 0;
    while (lead + 1 < ni && dig[lead] == '0')
        lead++;
    size_t k = 0;
    bool zero = true;
    for (size_t j = lead; j < nd; j++)
        zero = zero && dig[j] == '0';
    if (neg && !zero)
        buf[k++] = '-';
    if (ni == 0)
        buf[k++] = '0';
    for (size_t j = lead; j < ni; j++)
        buf[k++] = dig[j];
    size_t last = nd;
    while (last > ni && dig[last - 1] == '0')
        last--;
    if (last > ni) {
        buf[k++] = '.';
        for (size_t j = ni; j < last; j++)
            buf[k++] = dig[j];
    }
    buf[k] = '\0';
    return k;
}

static char *round_path_data(const char *d)
{
    size_t n = strlen(d);
    char *out = malloc(n + 1);
    if (!out)
        return NULL;
    size_t k = 0;
    for (size_t i = 0; i < n;) {
        char c = d[i];
        bool num = (c >= '0' && c <= '9') || c == '.' ||
                   ((c == '-' || c == '+') && i + 1 < n &&
                    ((d[i + 1] >= '0' && d[i + 1] <= '9') || d[i + 1] == '.'));
        if (!num) {
            out[k++] = d[i++];
            continue;
        }
        /* the token: sign, digits, point, digits (and an exponent, if any) */
        size_t used = (c == '-' || c == '+') ? 1 : 0;
        while (i + used < n && ((d[i + used] >= '0' && d[i + used] <= '9') || d[i + used] == '.'))
            used++;
        char buf[80];
        size_t pl = (i + used < n && (d[i + used] == 'e' || d[i + used] == 'E'))
                        ? 0
                        : round_plain(d + i, used, buf);
        if (pl > 0) {
            if (pl > used) { /* never longer than what it replaces */
                memcpy(out + k, d + i, used);
                k += used;
            } else {
                memcpy(out + k, buf, pl);
                k += pl;
            }
            i += used;
            continue;
        }
        char *end;
        double v = strtod(d + i, &end);
        used = (size_t)(end - (d + i));
        if (used == 0) {
            out[k++] = d[i++];
            continue;
        }
        int w = snprintf(buf, sizeof buf, "%.2f", v);
        if (w < 0 || (size_t)w >= sizeof buf) { /* cannot happen for a coordinate: keep it */
            memcpy(out + k, d + i, used);
            k += used;
            i += used;
            continue;
        }
        char *dot = strchr(buf, '.');
        if (dot) {
            char *e = buf + w - 1;
            while (e > dot && *e == '0')
                *e-- = '\0';
            if (e == dot)
                *e = '\0';
        }
        if (strcmp(buf, "-0") == 0)
            strcpy(buf, "0");
        size_t bl = strlen(buf);
        if (bl > used) { /* never longer than what it replaces */
            memcpy(out + k, d + i, used);
            k += used;
        } else {
            memcpy(out + k, buf, bl);
            k += bl;
        }
        i += used;
    }
    out[k] = '\0';
    return out;
}

static bool round_paths(xmlNodePtr n)
{
    for (; n; n = n->next) {
        if (n->type != XML_ELEMENT_NODE)
            continue;
        if (xmlStrcmp(n->name, BAD_CAST "path") == 0) {
            xmlChar *d = xmlGetProp(n, BAD_CAST "d");
            if (d) {
                char *r = round_path_data((const char *)d);
                xmlFree(d);
                if (!r)
                    return false;
                xmlSetProp(n, BAD_CAST "d", BAD_CAST r);
                free(r);
            }
        }
        if (!round_paths(n->children))
            return false;
    }
    return true;
}

xmlNodePtr fig_svg_into(hdoc *h, xmlNodePtr parent, double w_pt, double h_pt, fig_draw_fn draw,
                        const void *ctx)
{
    if (h->failed || !parent)
        return NULL;
    char *counts = NULL;
    xmlNodePtr copy = NULL;
    unsigned nfig = ++h->nfig;
    /* SVG text first; glyphs if the texts do not all find their markers */
    for (int glyphs = 0; glyphs < 2 && !copy; glyphs++) {
        char *svg = NULL;
        size_t len = 0;
        text_sink *ts = NULL;
        sl_error err;
        free(counts);
        counts = NULL;
        if (render_svg(w_pt, h_pt, draw, ctx, &svg, &len, &counts, glyphs ? NULL : &ts, &err) !=
                SL_OK ||
            len > INT32_MAX) {
            free(svg);
            text_sink_free(ts);
            break;
        }
        xmlDocPtr sd = xmlReadMemory(svg, (int)len, "figure.svg", NULL,
                                     XML_PARSE_NONET | XML_PARSE_NOBLANKS | XML_PARSE_HUGE);
        free(svg);
        xmlNodePtr root = sd ? xmlDocGetRootElement(sd) : NULL;
        bool placed = false;
        if (root) {
            bool *used = ts && ts->n ? calloc(ts->n, sizeof *used) : NULL;
            placed = !ts || !ts->n || (used && place_texts(root, ts, used));
            free(used);
        }
        text_sink_free(ts);
        if (!placed) {
            if (sd)
                xmlFreeDoc(sd);
            if (!root)
                break;
            continue;
        }
        char prefix[32];
        snprintf(prefix, sizeof prefix, "fig%u-", nfig);
        idset ids = {0};
        bool ok = prefix_ids(root, prefix, &ids) && rewrite_refs(root, &ids) &&
                  round_paths(root);
        idset_free(&ids);
        copy = ok ? xmlDocCopyNode(root, h->doc, 1) : NULL;
        xmlFreeDoc(sd);
        if (!ok || !copy)
            break;
    }
    if (!copy) {
        free(counts);
        h->failed = true;
        return NULL;
    }
    xmlAddChild(parent, copy);
    hattr(h, copy, "role", "img");
    hattr(h, copy, "class", "figure");
    hattr(h, copy, "style", "max-width:100%;height:auto");
    if (counts)
        hattr(h, copy, "data-counts", counts);
    free(counts);
    return copy;
}

/* Every Pango font map a figure has used, with a reference of ours. Each
 * thread has its own default map, and Pango's own threads (fontconfig's
 * start-up and font matching) hold a map until their task ends. A map is
 * finished (and its fonts, which hold cairo's, freed) where its last
 * reference goes; holding one ourselves lets that be our thread, at a time
 * we choose: when ours is the last reference left. Waiting for a weak
 * reference to clear is not enough, as it clears before the map's fonts
 * are freed, in the thread that drops the map. */
typedef struct fontmap_ref {
    PangoFontMap *fm;
    struct fontmap_ref *next;
} fontmap_ref;

static GMutex fontmaps_lock;
static fontmap_ref *fontmaps;

static bool only_ours(PangoFontMap *fm)
{
    return g_atomic_int_get((gint *)&G_OBJECT(fm)->ref_count) == 1;
}

static void fontmap_seen(PangoFontMap *fm)
{
    g_mutex_lock(&fontmaps_lock);
    bool known = false;
    for (fontmap_ref **rp = &fontmaps; *rp;) {
        fontmap_ref *r = *rp;
        known = known || r->fm == fm;
        if (r->fm != fm && only_ours(r->fm)) {
            /* its thread has ended: finish it here, so that a long run of
             * threads (listen) does not keep every map */
            *rp = r->next;
            g_object_unref(r->fm);
            free(r);
            continue;
        }
        rp = &r->next;
    }
    fontmap_ref *r = known ? NULL : malloc(sizeof *r);
    if (r) {
        r->fm = g_object_ref(fm);
        r->next = fontmaps;
        fontmaps = r;
    }
    g_mutex_unlock(&fontmaps_lock);
}

static bool fontmaps_only_ours(void)
{
    bool all = true;
    g_mutex_lock(&fontmaps_lock);
    for (fontmap_ref *r = fontmaps; r && all; r = r->next)
        all = only_ours(r->fm);
    g_mutex_unlock(&fontmaps_lock);
    return all;
}

void sl_report_release_caches(void)
{
    pango_cairo_font_map_set_default(NULL);
    /* cairo's reset is safe only once no font of it is alive: wait until
     * every map is held by us alone (briefly: a Pango task ends soon after
     * the drawing), finish the maps here, then reset; if a map stays held,
     * leave the caches to the end of the process rather than have cairo
     * assert */
    g_mutex_lock(&shapes_lock);
    shapes_clear();
    g_mutex_unlock(&shapes_lock);
    bool ready = fontmaps_only_ours();
    for (int tries = 0; tries < 2000 && !ready; tries++) {
        g_usleep(1000);
        ready = fontmaps_only_ours();
    }
    if (!ready)
        return;
    g_mutex_lock(&fontmaps_lock);
    while (fontmaps) {
        fontmap_ref *r = fontmaps;
        fontmaps = r->next;
        g_object_unref(r->fm);
        free(r);
    }
    g_mutex_unlock(&fontmaps_lock);
    cairo_debug_reset_static_data();
    FcFini();
}

/* -------------------------------------------------------------- text -- */

static const cairo_user_data_key_t layout_key;

/* One layout per cairo context, kept on the context and set afresh for each
 * text: making a layout (and its font options) for every tick label costs
 * more than drawing it. Borrowed: the context owns it. */
static PangoLayout *layout_for(cairo_t *cr, const char *text, fig_font f, double max_w)
{
    PangoLayout *l = cairo_get_user_data(cr, &layout_key);
    if (!l) {
        l = pango_cairo_create_layout(cr);
        /* the same glyph positions on every surface: no hinting of metrics */
        cairo_font_options_t *fo = cairo_font_options_create();
        cairo_font_options_set_hint_metrics(fo, CAIRO_HINT_METRICS_OFF);
        cairo_font_options_set_hint_style(fo, CAIRO_HINT_STYLE_NONE);
        pango_cairo_context_set_font_options(pango_layout_get_context(l), fo);
        cairo_font_options_destroy(fo);
        fontmap_seen(pango_context_get_font_map(pango_layout_get_context(l)));
        if (cairo_set_user_data(cr, &layout_key, l, g_object_unref) != CAIRO_STATUS_SUCCESS) {
            g_object_unref(l);
            return NULL;
        }
    }
    pango_cairo_update_layout(cr, l); /* the context's transformation may have changed */
    PangoFontDescription *d = pango_font_description_from_string("DejaVu Sans");
    pango_font_description_set_absolute_size(d, f.size_pt * PANGO_SCALE);
    if (f.bold)
        pango_font_description_set_weight(d, PANGO_WEIGHT_BOLD);
    if (f.italic)
        pango_font_description_set_style(d, PANGO_STYLE_ITALIC);
    pango_layout_set_font_description(l, d);
    pango_font_description_free(d);
    pango_layout_set_ellipsize(l, PANGO_ELLIPSIZE_NONE);
    if (max_w > 0) {
        pango_layout_set_width(l, (int)(max_w * PANGO_SCALE));
        pango_layout_set_wrap(l, PANGO_WRAP_WORD_CHAR);
    } else if (max_w < 0) { /* one line, cut with an ellipsis */
        pango_layout_set_width(l, (int)(-max_w * PANGO_SCALE));
        pango_layout_set_ellipsize(l, PANGO_ELLIPSIZE_END);
    } else {
        pango_layout_set_width(l, -1);
    }
    /* names come from DICOM files: a byte that is not UTF-8 becomes a
     * replacement character rather than a warning printed by Pango. The
     * same text again (measured, then drawn) keeps the layout Pango has
     * made: setting a text always makes it lay the text out afresh. */
    const char *now = pango_layout_get_text(l);
    if (g_utf8_validate(text, -1, NULL)) {
        if (!now || strcmp(now, text) != 0)
            pango_layout_set_text(l, text, -1);
    } else {
        gchar *valid = g_utf8_make_valid(text, -1);
        if (!now || strcmp(now, valid) != 0)
            pango_layout_set_text(l, valid, -1);
        g_free(valid);
    }
    return l;
}

void fig_text_size(cairo_t *cr, const char *text, fig_font f, double max_w, double *w, double *h)
{
    int iw = 0, ih = 0;
    text_shape sh;
    if (sink_of(cr) && shape_get(cr, text, f, max_w, false, &sh)) {
        iw = sh.iw;
        ih = sh.ih;
    } else {
        PangoLayout *l = layout_for(cr, text, f, max_w);
        if (l)
            pango_layout_get_size(l, &iw, &ih);
    }
    *w = (double)iw / PANGO_SCALE;
    *h = (double)ih / PANGO_SCALE;
}

void fig_text(cairo_t *cr, double x, double y, double ax, double ay, const char *text, fig_font f,
              double max_w)
{
    text_sink *ts = sink_of(cr);
    if (ts) {
        text_shape sh;
        if (!shape_get(cr, text, f, max_w, true, &sh)) {
            ts->failed = true; /* out of memory: the figure is drawn again with glyphs */
        } else {
            double x0 = x - ax * sh.iw / PANGO_SCALE, y0 = y - ay * sh.ih / PANGO_SCALE;
            bool recorded = text_to_sink(cr, ts, &sh, x0, y0, f);
            lines_free(sh.lines, sh.nlines);
            if (recorded) {
                cairo_new_path(cr);
                return;
            }
        }
    }
    PangoLayout *l = layout_for(cr, text, f, max_w);
    if (!l)
        return;
    int iw, ih;
    pango_layout_get_size(l, &iw, &ih);
    double x0 = x - ax * iw / PANGO_SCALE, y0 = y - ay * ih / PANGO_SCALE;
    cairo_move_to(cr, x0, y0);
    pango_cairo_show_layout(cr, l);
    cairo_new_path(cr);
}

/* -------------------------------------------------------------- axes -- */

void fig_log_range(double lo, double hi, double *y0, double *y1)
{
    lo = fmax(lo, 1e-6);
    hi = fmax(hi, lo);
    *y0 = pow(10, floor(log10(lo) + 1e-9));
    *y1 = pow(10, ceil(log10(hi) - 1e-9));
    if (*y1 <= *y0)
        *y1 = *y0 * 10;
}

double fig_ax_x(const fig_axes *a, double x)
{
    return a->x + (x - a->x0) / (a->x1 - a->x0) * a->w;
}

double fig_ax_y(const fig_axes *a, double y)
{
    double f;
    if (a->logy)
        f = (log10(fmax(y, 1e-300)) - log10(a->y0)) / (log10(a->y1) - log10(a->y0));
    else
        f = (y - a->y0) / (a->y1 - a->y0);
    return a->y + a->h - f * a->h;
}

static double nice_step(double span, double n)
{
    double raw = span / n, mag = pow(10, floor(log10(raw)));
    double f = raw / mag;
    return (f < 1.5 ? 1 : f < 3.5 ? 2 : f < 7.5 ? 5 : 10) * mag;
}

void fig_axes_draw(cairo_t *cr, const fig_axes *a, const char *xlabel, const char *ylabel,
                   bool xticks, bool yticks, double font_pt)
{
    fig_font tf = {font_pt, false, false};
    char buf[48];
    cairo_save(cr);
    cairo_set_line_width(cr, 0.4);
    /* x grid (one path), then the tick labels */
    double xs = nice_step(a->x1 - a->x0, fmax(2, a->w / (font_pt * 6)));
    cairo_set_source_rgb(cr, 0.85, 0.85, 0.85);
    for (double x = ceil(a->x0 / xs - 1e-9) * xs; x <= a->x1 + xs * 1e-6; x += xs) {
        cairo_move_to(cr, fig_ax_x(a, x), a->y);
        cairo_line_to(cr, fig_ax_x(a, x), a->y + a->h);
    }
    cairo_stroke(cr);
    for (double x = ceil(a->x0 / xs - 1e-9) * xs; x <= a->x1 + xs * 1e-6; x += xs) {
        double px = fig_ax_x(a, x);
        if (xticks) {
            cairo_set_source_rgb(cr, 0.1, 0.1, 0.1);
            fig_format_number(fabs(x) < xs * 1e-6 ? 0 : x, buf, sizeof buf);
            fig_text(cr, px, a->y + a->h + 2, 0.5, 0, buf, tf, 0);
        }
    }
    /* y grid and ticks; the axis label goes left of the widest tick label */
    double ywide = 0;
    if (a->logy) {
        double decades = log10(a->y1 / a->y0);
        int every = decades > 8 ? 2 : 1;
        int k = 0;
        if (decades <= 3) { /* minor lines at 2 and 5 */
            cairo_set_source_rgb(cr, 0.92, 0.92, 0.92);
            for (double y = a->y0; y < a->y1; y *= 10)
                for (int m = 2; m <= 5; m += 3) {
                    cairo_move_to(cr, a->x, fig_ax_y(a, y * m));
                    cairo_line_to(cr, a->x + a->w, fig_ax_y(a, y * m));
                }
            cairo_stroke(cr);
        }
        cairo_set_source_rgb(cr, 0.8, 0.8, 0.8);
        for (double y = a->y0; y <= a->y1 * 1.0001; y *= 10) {
            cairo_move_to(cr, a->x, fig_ax_y(a, y));
            cairo_line_to(cr, a->x + a->w, fig_ax_y(a, y));
        }
        cairo_stroke(cr);
        for (double y = a->y0; y <= a->y1 * 1.0001; y *= 10, k++) {
            double py = fig_ax_y(a, y);
            if (yticks && k % every == 0) {
                cairo_set_source_rgb(cr, 0.1, 0.1, 0.1);
                fig_format_number(y, buf, sizeof buf);
                fig_text(cr, a->x - 3, py, 1, 0.5, buf, tf, 0);
                double tw, th;
                fig_text_size(cr, buf, tf, 0, &tw, &th);
                ywide = fmax(ywide, tw);
            }
        }
    } else {
        double ys = nice_step(a->y1 - a->y0, fmax(2, a->h / (font_pt * 3)));
        cairo_set_source_rgb(cr, 0.85, 0.85, 0.85);
        for (double y = ceil(a->y0 / ys - 1e-9) * ys; y <= a->y1 + ys * 1e-6; y += ys) {
            cairo_move_to(cr, a->x, fig_ax_y(a, y));
            cairo_line_to(cr, a->x + a->w, fig_ax_y(a, y));
        }
        cairo_stroke(cr);
        for (double y = ceil(a->y0 / ys - 1e-9) * ys; y <= a->y1 + ys * 1e-6; y += ys) {
            double py = fig_ax_y(a, y);
            if (yticks) {
                cairo_set_source_rgb(cr, 0.1, 0.1, 0.1);
                fig_format_number(fabs(y) < ys * 1e-6 ? 0 : y, buf, sizeof buf);
                fig_text(cr, a->x - 3, py, 1, 0.5, buf, tf, 0);
                double tw, th;
                fig_text_size(cr, buf, tf, 0, &tw, &th);
                ywide = fmax(ywide, tw);
            }
        }
    }
    cairo_set_source_rgb(cr, 0.1, 0.1, 0.1);
    cairo_set_line_width(cr, 0.8);
    cairo_rectangle(cr, a->x, a->y, a->w, a->h);
    cairo_stroke(cr);
    if (xlabel) {
        double tw, th;
        fig_text_size(cr, "0", tf, 0, &tw, &th);
        fig_text(cr, a->x + a->w / 2, a->y + a->h + 3 + th, 0.5, 0, xlabel, tf, 0);
    }
    if (ylabel) {
        cairo_save(cr);
        /* left of the tick labels, reading upward */
        cairo_translate(cr, a->x - 5 - ywide, a->y + a->h / 2);
        cairo_rotate(cr, -M_PI / 2);
        fig_text(cr, 0, 0, 0.5, 1, ylabel, tf, 0);
        cairo_restore(cr);
    }
    cairo_restore(cr);
}

/* ----------------------------------------------------- sorting doses -- */

static int cmp_dv_desc(const void *a, const void *b)
{
    const fig_dv *x = a, *y = b;
    return x->d > y->d ? -1 : x->d < y->d;
}

/* A key whose unsigned order is the dose's descending order: IEEE 754
 * doubles order as their bits once a negative one's are all flipped and a
 * positive one's sign is set; -0 counts as +0, as the comparison has it. */
static uint64_t dv_key(double d)
{
    uint64_t b;
    if (d == 0)
        d = 0; /* -0 as +0 */
    memcpy(&b, &d, sizeof b);
    b = (b >> 63) ? ~b : b | (UINT64_C(1) << 63);
    return ~b;
}

/* A least-significant-digit radix sort, stable by construction, in 8
 * passes of a byte, each skipped where every key has the same byte (the
 * exponent's high bits, mostly). The eight bytes' counts come from one
 * read of the keys, and the passes move the data back and forth between
 * the two buffers, copying once at the end if it ends in the scratch. */
void fig_dv_sort_desc(fig_dv *a, fig_dv *tmp, uint64_t *key, uint64_t *ktmp, size_t n)
{
    size_t cnt[8][257];
    memset(cnt, 0, sizeof cnt);
    for (size_t i = 0; i < n; i++) {
        if (isnan(a[i].d)) {
            qsort(a, n, sizeof *a, cmp_dv_desc);
            return;
        }
        uint64_t k = dv_key(a[i].d);
        key[i] = k;
        for (int b = 0; b < 8; b++)
            cnt[b][((k >> (8 * b)) & 0xff) + 1]++;
    }
    fig_dv *src = a, *dst = tmp;
    uint64_t *ksrc = key, *kdst = ktmp;
    for (int pass = 0; pass < 8; pass++) {
        size_t *count_b = cnt[pass];
        bool one = false;
        for (int b = 1; b <= 256; b++)
            one = one || count_b[b] == n;
        if (one)
            continue;
        for (int b = 1; b <= 256; b++)
            count_b[b] += count_b[b - 1];
        int shift = 8 * pass;
        for (size_t i = 0; i < n; i++) {
            size_t at = count_b[(ksrc[i] >> shift) & 0xff]++;
            dst[at] = src[i];
            kdst[at] = ksrc[i];
        }
        fig_dv *t = src;
        src = dst;
        dst = t;
        uint64_t *kt = ksrc;
        ksrc = kdst;
        kdst = kt;
    }
    if (src != a)
        memcpy(a, src, n * sizeof *a);
}

/* ------------------------------------------------------- path thinning -- */

static double seg_dist2(const cairo_path_data_t *p, const cairo_path_data_t *a,
                        const cairo_path_data_t *b)
{
    double ax = a[1].point.x, ay = a[1].point.y, dx = b[1].point.x - ax,
           dy = b[1].point.y - ay, px = p[1].point.x - ax, py = p[1].point.y - ay;
    double l2 = dx * dx + dy * dy, t = l2 > 0 ? (px * dx + py * dy) / l2 : 0;
    t = t < 0 ? 0 : t > 1 ? 1 : t;
    px -= t * dx;
    py -= t * dy;
    return px * px + py * py;
}

/* Mark which of run[0..n) to keep (keep[0] and keep[n - 1] always): the
 * Ramer-Douglas-Peucker method with a stack of spans instead of recursion,
 * so a long run cannot exhaust the call stack. */
static void thin_run(const cairo_path_data_t **run, size_t n, double tol2, bool *keep,
                     size_t *stack)
{
    for (size_t i = 0; i < n; i++)
        keep[i] = i == 0 || i + 1 == n;
    size_t top = 0;
    if (n > 2) {
        stack[top++] = 0;
        stack[top++] = n - 1;
    }
    while (top > 0) {
        size_t hi = stack[--top], lo = stack[--top];
        double worst = -1;
        size_t at = lo;
        for (size_t i = lo + 1; i < hi; i++) {
            double d2 = seg_dist2(run[i], run[lo], run[hi]);
            if (d2 > worst) {
                worst = d2;
                at = i;
            }
        }
        if (!(worst > tol2)) /* a NaN keeps nothing between: the ends stay */
            continue;
        keep[at] = true;
        if (at - lo > 1) {
            stack[top++] = lo;
            stack[top++] = at;
        }
        if (hi - at > 1) {
            stack[top++] = at;
            stack[top++] = hi;
        }
    }
}

static void emit_run(cairo_t *cr, const cairo_path_data_t **run, size_t n, const bool *keep,
                     bool starts)
{
    for (size_t i = 0; i < n; i++) {
        if (!keep[i])
            continue;
        if (i == 0 && starts)
            cairo_move_to(cr, run[i][1].point.x, run[i][1].point.y);
        else if (i > 0)
            cairo_line_to(cr, run[i][1].point.x, run[i][1].point.y);
    }
}

void fig_path_thin(cairo_t *cr)
{
    cairo_path_t *p = cairo_copy_path(cr);
    if (!p || p->status != CAIRO_STATUS_SUCCESS || p->num_data == 0) {
        cairo_path_destroy(p);
        return; /* the path stays as drawn */
    }
    /* the tolerance in user units: over the CTM's largest scale factor (its
     * linear part's largest singular value), so that no direction of the
     * page strays more than the tolerance */
    cairo_matrix_t m;
    cairo_get_matrix(cr, &m);
    double p2 = m.xx * m.xx + m.yx * m.yx + m.xy * m.xy + m.yy * m.yy,
           det = m.xx * m.yy - m.xy * m.yx;
    double smax2 = 0.5 * (p2 + sqrt(fmax(p2 * p2 - 4 * det * det, 0)));
    double tol2 = FIG_THIN_TOLERANCE_PT * FIG_THIN_TOLERANCE_PT / smax2;
    size_t n = (size_t)p->num_data;
    const cairo_path_data_t **run = malloc(n * sizeof *run);
    bool *keep = malloc(n * sizeof *keep);
    size_t *stack = malloc(2 * n * sizeof *stack);
    if (!run || !keep || !stack || !(tol2 > 0)) {
        free(run);
        free(keep);
        free(stack);
        cairo_path_destroy(p);
        return;
    }
    cairo_new_path(cr);
    /* a run: the point the line starts from (a move, or the end of a curve)
     * and the line-tos after it */
    size_t nr = 0;
    bool starts = false; /* the run's first point is a move-to */
    for (int i = 0; i < p->num_data; i += p->data[i].header.length) {
        const cairo_path_data_t *d = &p->data[i];
        switch (d->header.type) {
        case CAIRO_PATH_MOVE_TO:
            thin_run(run, nr, tol2, keep, stack);
            emit_run(cr, run, nr, keep, starts);
            run[0] = d;
            nr = 1;
            starts = true;
            break;
        case CAIRO_PATH_LINE_TO:
            if (nr == 0) {
                /* a line straight after a close starts from where the close
                 * left the pen: drawn as it is, and the run's anchor */
                cairo_line_to(cr, d[1].point.x, d[1].point.y);
                starts = false;
            }
            run[nr++] = d;
            break;
        case CAIRO_PATH_CURVE_TO:
            thin_run(run, nr, tol2, keep, stack);
            emit_run(cr, run, nr, keep, starts);
            cairo_curve_to(cr, d[1].point.x, d[1].point.y, d[2].point.x, d[2].point.y,
                           d[3].point.x, d[3].point.y);
            /* the curve's end starts the next run; its data holds the point
             * at d[3], seen as [1] from d + 2 */
            run[0] = d + 2;
            nr = 1;
            starts = false;
            break;
        case CAIRO_PATH_CLOSE_PATH:
            thin_run(run, nr, tol2, keep, stack);
            emit_run(cr, run, nr, keep, starts);
            cairo_close_path(cr);
            nr = 0;
            break;
        }
    }
    thin_run(run, nr, tol2, keep, stack);
    emit_run(cr, run, nr, keep, starts);
    free(run);
    free(keep);
    free(stack);
    cairo_path_destroy(p);
}

void fig_boxed(cairo_t *cr, double w, double h, fig_draw_fn draw, const void *ctx)
{
    cairo_save(cr);
    cairo_rectangle(cr, 0, 0, w, h);
    cairo_clip(cr);
    cairo_rectangle(cr, 0, 0, w, h);
    cairo_set_source_rgb(cr, 1, 1, 1);
    cairo_fill(cr);
    draw(cr, w, h, ctx);
    cairo_restore(cr);
}
