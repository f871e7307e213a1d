/*
 * strayline: strict reading and tidy writing of YAML files (libyaml), shared
 * by the model file, the measurement set and the action-level table.
 *
 * Reading is strict because these files carry clinical numbers: the file is
 * capped in size, nesting is capped in depth, aliases and anchors are
 * refused (no self-references, no exponential expansions), exactly one
 * document is allowed, every mapping is checked against the keys it may
 * have (unknown, missing and duplicate keys are errors), and every number is
 * parsed strictly and checked finite. Messages read "FILE:LINE:COLUMN: what
 * was wrong", lines and columns counted from 1.
 */
#ifndef STRAYLINE_YAMLIO_H
#define STRAYLINE_YAMLIO_H

#include <stdbool.h>
#include <stddef.h>
#include <stdio.h>

#include <yaml.h>

#include "strayline/error.h"

#ifdef __cplusplus
extern "C" {
#endif

#define SL_YAML_MAX_BYTES ((size_t)64 << 20)
#define SL_YAML_MAX_DEPTH 32

typedef struct sl_yaml {
    yaml_document_t doc;
    const char *file;
    bool loaded;
} sl_yaml;

sl_status sl_yaml_load(sl_yaml *y, const char *path, sl_error *err);
sl_status sl_yaml_load_buffer(sl_yaml *y, const char *data, size_t size, const char *name,
                              sl_error *err);
void sl_yaml_free(sl_yaml *y);

yaml_node_t *sl_yaml_root(sl_yaml *y);

/* One key a mapping may have. */
typedef struct sl_yaml_field {
    const char *key;
    bool required;
    yaml_node_t *node; /* filled: the value, or NULL when absent */
} sl_yaml_field;

/* Check a mapping against its fields and fill their nodes. `what` names the
 * mapping in messages ("profile 3"). */
sl_status sl_yaml_fields(sl_yaml *y, yaml_node_t *map, const char *what, sl_yaml_field *fields,
                         size_t nfields, sl_error *err);

/* Typed values. `what` names the value in messages. */
sl_status sl_yaml_number(sl_yaml *y, yaml_node_t *n, const char *what, double *out,
                         sl_error *err);
/* A number that must lie in [lo, hi] (use -INFINITY / INFINITY for none). */
sl_status sl_yaml_number_in(sl_yaml *y, yaml_node_t *n, const char *what, double lo, double hi,
                            double *out, sl_error *err);
sl_status sl_yaml_int(sl_yaml *y, yaml_node_t *n, const char *what, int *out, sl_error *err);
sl_status sl_yaml_bool(sl_yaml *y, yaml_node_t *n, const char *what, bool *out, sl_error *err);
/* A scalar's text, copied (caller frees). */
sl_status sl_yaml_string(sl_yaml *y, yaml_node_t *n, const char *what, char **out,
                         sl_error *err);
/* The items of a sequence (a pointer into the document; *count items). */
sl_status sl_yaml_seq(sl_yaml *y, yaml_node_t *n, const char *what, yaml_node_item_t **items,
                      size_t *count, sl_error *err);
yaml_node_t *sl_yaml_item(sl_yaml *y, yaml_node_item_t item);
/* A sequence of numbers, into a malloc'd array. */
sl_status sl_yaml_numbers(sl_yaml *y, yaml_node_t *n, const char *what, double **out,
                          size_t *count, sl_error *err);

/* An error at a node: "FILE:LINE:COL: message". */
sl_status sl_yaml_error(sl_yaml *y, yaml_node_t *n, sl_error *err, const char *fmt, ...)
#if defined(__GNUC__)
    __attribute__((format(printf, 4, 5)))
#endif
    ;

/* ------------------------------------------------------------ writer -- */

typedef struct sl_yaml_writer {
    yaml_emitter_t em;
    bool failed;
    char error[256];
} sl_yaml_writer;

sl_status sl_yaml_writer_open(sl_yaml_writer *w, FILE *fp);
/* Finish the document and stream; SL_EIO on any failure along the way. */
sl_status sl_yaml_writer_close(sl_yaml_writer *w, sl_error *err);

void sl_yaml_map_begin(sl_yaml_writer *w, bool flow);
void sl_yaml_map_end(sl_yaml_writer *w);
void sl_yaml_seq_begin(sl_yaml_writer *w, bool flow);
void sl_yaml_seq_end(sl_yaml_writer *w);
void sl_yaml_put_string(sl_yaml_writer *w, const char *s); /* quoted when it could be misread */
void sl_yaml_put_number(sl_yaml_writer *w, double v);      /* shortest text that reads back exactly */
void sl_yaml_put_int(sl_yaml_writer *w, long long v);
void sl_yaml_put_bool(sl_yaml_writer *w, bool v);
void sl_yaml_key(sl_yaml_writer *w, const char *key);
/* A key with a value, in one call. */
void sl_yaml_kv_string(sl_yaml_writer *w, const char *key, const char *s);
void sl_yaml_kv_number(sl_yaml_writer *w, const char *key, double v);
void sl_yaml_kv_int(sl_yaml_writer *w, const char *key, long long v);
void sl_yaml_kv_bool(sl_yaml_writer *w, const char *key, bool v);
void sl_yaml_kv_numbers(sl_yaml_writer *w, const char *key, const double *v, size_t n);

/* The shortest decimal text of v that strtod reads back as v. */
void sl_format_exact(double v, char buf[32]);

#ifdef __cplusplus
}
#endif

#endif
