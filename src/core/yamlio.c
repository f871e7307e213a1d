/*
 * Strict YAML reading and tidy YAML writing over libyaml (see yamlio.h).
 *
 * libyaml's document loader accepts duplicate keys, resolves aliases into
 * shared nodes (a node may even contain itself) and has no depth limit, so a
 * first pass over the event stream refuses anchors, aliases, deep nesting
 * and extra documents before the document is loaded at all.
 */
#include "strayline/yamlio.h"
#include "strayline/util.h"

#include <ctype.h>
#include <math.h>
#include <stdarg.h>
#include <stdlib.h>
#include <string.h>

sl_status sl_yaml_error(sl_yaml *y, yaml_node_t *n, sl_error *err, const char *fmt, ...)
{
    char msg[SL_ERROR_MSG_MAX];
    va_list ap;
    va_start(ap, fmt);
    vsnprintf(msg, sizeof msg, fmt, ap);
    va_end(ap);
    if (n)
        return sl_error_set(err, SL_EINPUT, "%s:%zu:%zu: %s", y->file, n->start_mark.line + 1,
                            n->start_mark.column + 1, msg);
    return sl_error_set(err, SL_EINPUT, "%s: %s", y->file, msg);
}

static sl_status prescan(const char *data, size_t size, const char *name, sl_error *err)
{
    yaml_parser_t p;
    if (!yaml_parser_initialize(&p))
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    yaml_parser_set_input_string(&p, (const unsigned char *)data, size);
    int depth = 0, docs = 0;
    sl_status st = SL_OK;
    for (;;) {
        yaml_event_t ev;
        if (!yaml_parser_parse(&p, &ev)) {
            st = sl_error_set(err, SL_EINPUT, "%s:%zu:%zu: YAML syntax error: %s%s%s", name,
                              p.problem_mark.line + 1, p.problem_mark.column + 1,
                              p.problem ? p.problem : "unknown problem",
                              p.context ? " " : "", p.context ? p.context : "");
            break;
        }
        yaml_event_type_t t = ev.type;
        size_t line = ev.start_mark.line + 1, col = ev.start_mark.column + 1;
        const unsigned char *anchor = t == YAML_SCALAR_EVENT ? ev.data.scalar.anchor
                                      : t == YAML_SEQUENCE_START_EVENT
                                          ? ev.data.sequence_start.anchor
                                      : t == YAML_MAPPING_START_EVENT
                                          ? ev.data.mapping_start.anchor
                                          : NULL;
        yaml_event_delete(&ev);
        if (t == YAML_ALIAS_EVENT || anchor) {
            st = sl_error_set(err, SL_EINPUT,
                              "%s:%zu:%zu: anchors and aliases are not accepted in strayline "
                              "files",
                              name, line, col);
            break;
        }
        if (t == YAML_DOCUMENT_START_EVENT && ++docs > 1) {
            st = sl_error_set(err, SL_EINPUT, "%s:%zu:%zu: more than one YAML document", name,
                              line, col);
            break;
        }
        if (t == YAML_SEQUENCE_START_EVENT || t == YAML_MAPPING_START_EVENT) {
            if (++depth > SL_YAML_MAX_DEPTH) {
                st = sl_error_set(err, SL_EINPUT, "%s:%zu:%zu: nested more than %d levels deep",
                                  name, line, col, SL_YAML_MAX_DEPTH);
                break;
            }
        } else if (t == YAML_SEQUENCE_END_EVENT || t == YAML_MAPPING_END_EVENT) {
            depth--;
        } else if (t == YAML_STREAM_END_EVENT) {
            break;
        }
    }
    yaml_parser_delete(&p);
    if (st == SL_OK && docs == 0)
        st = sl_error_set(err, SL_EINPUT, "%s: empty file, no YAML document", name);
    return st;
}

sl_status sl_yaml_load_buffer(sl_yaml *y, const char *data, size_t size, const char *name,
                              sl_error *err)
{
    memset(y, 0, sizeof *y);
    y->file = name;
    if (size > SL_YAML_MAX_BYTES)
        return sl_error_set(err, SL_EINPUT, "%s: larger than %zu bytes", name, SL_YAML_MAX_BYTES);
    sl_status st = prescan(data, size, name, err);
    if (st != SL_OK)
        return st;
    yaml_parser_t p;
    if (!yaml_parser_initialize(&p))
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    yaml_parser_set_input_string(&p, (const unsigned char *)data, size);
    if (!yaml_parser_load(&p, &y->doc)) {
        st = sl_error_set(err, SL_EINPUT, "%s:%zu:%zu: YAML error: %s", name,
                          p.problem_mark.line + 1, p.problem_mark.column + 1,
                          p.problem ? p.problem : "unknown problem");
        yaml_parser_delete(&p);
        return st;
    }
    yaml_parser_delete(&p);
    y->loaded = true;
    if (!yaml_document_get_root_node(&y->doc)) {
        sl_yaml_free(y);
        return sl_error_set(err, SL_EINPUT, "%s: empty file, no YAML document", name);
    }
    /* Every node plain: a tag (!python/object, !!binary ...) would be ignored
     * silently, and a NUL inside a string would cut it short. The nodes are
     * one flat array, so this is a single pass. */
    for (yaml_node_t *n = y->doc.nodes.start; n < y->doc.nodes.top; n++) {
        const char *want = n->type == YAML_SCALAR_NODE     ? YAML_DEFAULT_SCALAR_TAG
                           : n->type == YAML_SEQUENCE_NODE ? YAML_DEFAULT_SEQUENCE_TAG
                                                           : YAML_DEFAULT_MAPPING_TAG;
        const char *what = NULL, *shown = NULL;
        if (n->tag && strcmp((const char *)n->tag, want) != 0) {
            what = "a YAML tag";
            shown = (const char *)n->tag;
        } else if (n->type == YAML_SCALAR_NODE &&
                   memchr(n->data.scalar.value, 0, n->data.scalar.length)) {
            what = "a NUL character";
            shown = "\\0";
        }
        if (what) {
            st = sl_error_set(err, SL_EINPUT, "%s:%zu:%zu: %s ('%.60s') is not accepted here",
                              name, n->start_mark.line + 1, n->start_mark.column + 1, what,
                              shown);
            sl_yaml_free(y);
            return st;
        }
    }
    return SL_OK;
}

sl_status sl_yaml_load(sl_yaml *y, const char *path, sl_error *err)
{
    char *data;
    size_t size;
    memset(y, 0, sizeof *y);
    sl_status st = sl_read_file(path, SL_YAML_MAX_BYTES, &data, &size, err);
    if (st != SL_OK)
        return st;
    st = sl_yaml_load_buffer(y, data, size, path, err);
    free(data);
    return st;
}

void sl_yaml_free(sl_yaml *y)
{
    if (y->loaded)
        yaml_document_delete(&y->doc);
    y->loaded = false;
}

yaml_node_t *sl_yaml_root(sl_yaml *y)
{
    return yaml_document_get_root_node(&y->doc);
}

yaml_node_t *sl_yaml_item(sl_yaml *y, yaml_node_item_t item)
{
    return yaml_document_get_node(&y->doc, item);
}

static const char *scalar(yaml_node_t *n)
{
    return n && n->type == YAML_SCALAR_NODE ? (const char *)n->data.scalar.value : NULL;
}

sl_status sl_yaml_fields(sl_yaml *y, yaml_node_t *map, const char *what, sl_yaml_field *fields,
                         size_t nfields, sl_error *err)
{
    if (!map || map->type != YAML_MAPPING_NODE)
        return sl_yaml_error(y, map, err, "%s: expected a mapping of keys", what);
    for (size_t i = 0; i < nfields; i++)
        fields[i].node = NULL;
    for (yaml_node_pair_t *p = map->data.mapping.pairs.start; p < map->data.mapping.pairs.top;
         p++) {
        yaml_node_t *k = yaml_document_get_node(&y->doc, p->key);
        const char *key = scalar(k);
        if (!key)
            return sl_yaml_error(y, k, err, "%s: a key must be plain text", what);
        size_t i = 0;
        while (i < nfields && strcmp(fields[i].key, key) != 0)
            i++;
        if (i == nfields) {
            char allowed[512] = "";
            for (size_t j = 0; j < nfields; j++) {
                strncat(allowed, j ? ", " : "", sizeof allowed - strlen(allowed) - 1);
                strncat(allowed, fields[j].key, sizeof allowed - strlen(allowed) - 1);
            }
            return sl_yaml_error(y, k, err, "%s: unknown key '%s' (expected one of: %s)", what,
                                 key, allowed);
        }
        if (fields[i].node)
            return sl_yaml_error(y, k, err, "%s: duplicate key '%s'", what, key);
        fields[i].node = yaml_document_get_node(&y->doc, p->value);
    }
    for (size_t i = 0; i < nfields; i++) {
        if (fields[i].required && !fields[i].node)
            return sl_yaml_error(y, map, err, "%s: missing key '%s'", what, fields[i].key);
    }
    return SL_OK;
}

sl_status sl_yaml_number(sl_yaml *y, yaml_node_t *n, const char *what, double *out,
                         sl_error *err)
{
    const char *s = scalar(n);
    if (!s)
        return sl_yaml_error(y, n, err, "%s: expected a number", what);
    if (n->data.scalar.style != YAML_PLAIN_SCALAR_STYLE || !sl_parse_double(s, out))
        return sl_yaml_error(y, n, err, "%s: '%s' is not a finite number", what, s);
    return SL_OK;
}

sl_status sl_yaml_number_in(sl_yaml *y, yaml_node_t *n, const char *what, double lo, double hi,
                            double *out, sl_error *err)
{
    sl_status st = sl_yaml_number(y, n, what, out, err);
    if (st != SL_OK)
        return st;
    if (*out < lo || *out > hi) {
        if (isinf(hi))
            return sl_yaml_error(y, n, err, "%s: %g is below the smallest allowed value %g",
                                 what, *out, lo);
        return sl_yaml_error(y, n, err, "%s: %g lies outside %g to %g", what, *out, lo, hi);
    }
    return SL_OK;
}

sl_status sl_yaml_int(sl_yaml *y, yaml_node_t *n, const char *what, int *out, sl_error *err)
{
    const char *s = scalar(n);
    if (!s || !sl_parse_int(s, out))
        return sl_yaml_error(y, n, err, "%s: expected a whole number%s%s%s", what,
                             s ? ", found '" : "", s ? s : "", s ? "'" : "");
    return SL_OK;
}

sl_status sl_yaml_bool(sl_yaml *y, yaml_node_t *n, const char *what, bool *out, sl_error *err)
{
    const char *s = scalar(n);
    if (s && strcmp(s, "true") == 0)
        *out = true;
    else if (s && strcmp(s, "false") == 0)
        *out = false;
    else
        return sl_yaml_error(y, n, err, "%s: expected true or false", what);
    return SL_OK;
}

sl_status sl_yaml_string(sl_yaml *y, yaml_node_t *n, const char *what, char **out,
                         sl_error *err)
{
    const char *s = scalar(n);
    if (!s)
        return sl_yaml_error(y, n, err, "%s: expected text", what);
    bool ok = true;
    *out = sl_strdup(s, &ok);
    return ok ? SL_OK : sl_error_set(err, SL_ENOMEM, "out of memory");
}

sl_status sl_yaml_seq(sl_yaml *y, yaml_node_t *n, const char *what, yaml_node_item_t **items,
                      size_t *count, sl_error *err)
{
    if (!n || n->type != YAML_SEQUENCE_NODE)
        return sl_yaml_error(y, n, err, "%s: expected a list", what);
    *items = n->data.sequence.items.start;
    *count = (size_t)(n->data.sequence.items.top - n->data.sequence.items.start);
    return SL_OK;
}

sl_status sl_yaml_numbers(sl_yaml *y, yaml_node_t *n, const char *what, double **out,
                          size_t *count, sl_error *err)
{
    yaml_node_item_t *items;
    size_t k;
    *out = NULL;
    *count = 0;
    sl_status st = sl_yaml_seq(y, n, what, &items, &k, err);
    if (st != SL_OK)
        return st;
    double *v = malloc((k ? k : 1) * sizeof *v);
    if (!v)
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    for (size_t i = 0; i < k; i++) {
        st = sl_yaml_number(y, sl_yaml_item(y, items[i]), what, &v[i], err);
        if (st != SL_OK) {
            free(v);
            return st;
        }
    }
    *out = v;
    *count = k;
    return SL_OK;
}

/* ------------------------------------------------------------ writer -- */

static void emit(sl_yaml_writer *w, yaml_event_t *ev, bool ok)
{
    if (w->failed) {
        /* the emitter owns events only once given them */
        if (ok)
            yaml_event_delete(ev);
        return;
    }
    if (!ok) {
        w->failed = true;
        snprintf(w->error, sizeof w->error, "out of memory building YAML");
        return;
    }
    /* yaml_emitter_emit takes ownership even when it fails */
    if (!yaml_emitter_emit(&w->em, ev)) {
        w->failed = true;
        snprintf(w->error, sizeof w->error, "%s",
                 w->em.problem ? w->em.problem : "YAML emitter failed");
    }
}

sl_status sl_yaml_writer_open(sl_yaml_writer *w, FILE *fp)
{
    memset(w, 0, sizeof *w);
    if (!yaml_emitter_initialize(&w->em))
        return SL_ENOMEM;
    yaml_emitter_set_output_file(&w->em, fp);
    yaml_emitter_set_unicode(&w->em, 1);
    yaml_emitter_set_width(&w->em, 100);
    yaml_emitter_set_indent(&w->em, 2);
    yaml_event_t ev;
    emit(w, &ev, yaml_stream_start_event_initialize(&ev, YAML_UTF8_ENCODING));
    emit(w, &ev, yaml_document_start_event_initialize(&ev, NULL, NULL, NULL, 1));
    return w->failed ? SL_ENOMEM : SL_OK;
}

sl_status sl_yaml_writer_close(sl_yaml_writer *w, sl_error *err)
{
    yaml_event_t ev;
    emit(w, &ev, yaml_document_end_event_initialize(&ev, 1));
    emit(w, &ev, yaml_stream_end_event_initialize(&ev));
    if (!w->failed && !yaml_emitter_flush(&w->em)) {
        w->failed = true;
        snprintf(w->error, sizeof w->error, "cannot write the YAML output");
    }
    yaml_emitter_delete(&w->em);
    if (w->failed)
        return sl_error_set(err, SL_EIO, "writing YAML: %s", w->error);
    return SL_OK;
}

void sl_yaml_map_begin(sl_yaml_writer *w, bool flow)
{
    yaml_event_t ev;
    emit(w, &ev, yaml_mapping_start_event_initialize(
                     &ev, NULL, NULL, 1, flow ? YAML_FLOW_MAPPING_STYLE : YAML_BLOCK_MAPPING_STYLE));
}

void sl_yaml_map_end(sl_yaml_writer *w)
{
    yaml_event_t ev;
    emit(w, &ev, yaml_mapping_end_event_initialize(&ev));
}

void sl_yaml_seq_begin(sl_yaml_writer *w, bool flow)
{
    yaml_event_t ev;
    emit(w, &ev,
         yaml_sequence_start_event_initialize(
             &ev, NULL, NULL, 1, flow ? YAML_FLOW_SEQUENCE_STYLE : YAML_BLOCK_SEQUENCE_STYLE));
}

void sl_yaml_seq_end(sl_yaml_writer *w)
{
    yaml_event_t ev;
    emit(w, &ev, yaml_sequence_end_event_initialize(&ev));
}

static void scalar_out(sl_yaml_writer *w, const char *text, yaml_scalar_style_t style)
{
    yaml_event_t ev;
    emit(w, &ev,
         yaml_scalar_event_initialize(&ev, NULL, NULL, (yaml_char_t *)text, (int)strlen(text), 1,
                                      1, style));
}

/* Text that a YAML reader could take for something else (a number, a
 * boolean, null, or that starts with an indicator) is quoted. */
static bool needs_quotes(const char *s)
{
    if (!*s)
        return true;
    double d;
    int i;
    if (sl_parse_double(s, &d) || sl_parse_int(s, &i))
        return true;
    static const char *const words[] = {"true", "false", "yes", "no", "on", "off", "null",
                                        "~", "y", "n", ".nan", ".inf", "-.inf"};
    for (size_t k = 0; k < sizeof words / sizeof *words; k++) {
        if (sl_strcasecmp(s, words[k]) == 0)
            return true;
    }
    if (strchr("-?:,[]{}#&*!|>'\"%@`", s[0]) || isspace((unsigned char)s[0]) ||
        isspace((unsigned char)s[strlen(s) - 1]))
        return true;
    return strstr(s, ": ") || strstr(s, " #") || strchr(s, '\n');
}

void sl_yaml_put_string(sl_yaml_writer *w, const char *s)
{
    scalar_out(w, s ? s : "", needs_quotes(s ? s : "") ? YAML_DOUBLE_QUOTED_SCALAR_STYLE
                                                       : YAML_PLAIN_SCALAR_STYLE);
}

void sl_format_exact(double v, char buf[32])
{
    if (v == 0)
        v = 0; /* no "-0" */
    for (int prec = 6; prec <= 17; prec++) {
        snprintf(buf, 32, "%.*g", prec, v);
        if (strtod(buf, NULL) == v)
            return;
    }
}

void sl_yaml_put_number(sl_yaml_writer *w, double v)
{
    if (!isfinite(v)) {
        if (!w->failed) {
            w->failed = true;
            snprintf(w->error, sizeof w->error, "refused to write a non-finite number");
        }
        return;
    }
    char buf[32];
    sl_format_exact(v, buf);
    scalar_out(w, buf, YAML_PLAIN_SCALAR_STYLE);
}

void sl_yaml_put_int(sl_yaml_writer *w, long long v)
{
    char buf[32];
    snprintf(buf, sizeof buf, "%lld", v);
    scalar_out(w, buf, YAML_PLAIN_SCALAR_STYLE);
}

void sl_yaml_put_bool(sl_yaml_writer *w, bool v)
{
    scalar_out(w, v ? "true" : "false", YAML_PLAIN_SCALAR_STYLE);
}

void sl_yaml_key(sl_yaml_writer *w, const char *key)
{
    scalar_out(w, key, YAML_PLAIN_SCALAR_STYLE);
}

void sl_yaml_kv_string(sl_yaml_writer *w, const char *key, const char *s)
{
    sl_yaml_key(w, key);
    sl_yaml_put_string(w, s);
}

void sl_yaml_kv_number(sl_yaml_writer *w, const char *key, double v)
{
    sl_yaml_key(w, key);
    sl_yaml_put_number(w, v);
}

void sl_yaml_kv_int(sl_yaml_writer *w, const char *key, long long v)
{
    sl_yaml_key(w, key);
    sl_yaml_put_int(w, v);
}

void sl_yaml_kv_bool(sl_yaml_writer *w, const char *key, bool v)
{
    sl_yaml_key(w, key);
    sl_yaml_put_bool(w, v);
}

void sl_yaml_kv_numbers(sl_yaml_writer *w, const char *key, const double *v, size_t n)
{
    sl_yaml_key(w, key);
    sl_yaml_seq_begin(w, true);
    for (size_t i = 0; i < n; i++)
        sl_yaml_put_number(w, v[i]);
    sl_yaml_seq_end(w);
}
