/*
 * Private helpers for the JSON writers (json-c).
 *
 * Every number goes through jw_num() or jw_num_opt(): a non-finite value in a
 * required field is a bug upstream, so it is refused with an internal error
 * that names the field instead of being written as the invalid bare word NaN
 * or silently as null. Optional values that the input did not carry are NAN
 * by convention and become an explicit JSON null through jw_num_opt().
 */
#ifndef STRAYLINE_REPORT_JSONW_H
#define STRAYLINE_REPORT_JSONW_H

#include <stdbool.h>
#include <stdio.h>

#include <json-c/json.h>

#include "strayline/error.h"

typedef struct jw {
    sl_error *err;
    sl_status st; /* first failure; later calls do nothing */
} jw;

/* Significant digits of numbers in JSON output: enough that a machine
 * reading the JSON can check geometry to micrometres; the text reports round. */
#define JW_DIGITS 10

void jw_num(jw *w, json_object *obj, const char *key, double v);
void jw_num_opt(jw *w, json_object *obj, const char *key, double v);
void jw_int(jw *w, json_object *obj, const char *key, long long v);
void jw_str(jw *w, json_object *obj, const char *key, const char *s); /* NULL -> null */
void jw_bool(jw *w, json_object *obj, const char *key, bool v);
void jw_put(jw *w, json_object *obj, const char *key, json_object *val);
json_object *jw_number(jw *w, double v, const char *what);
void jw_append(jw *w, json_object *arr, json_object *val);
json_object *jw_notes(jw *w, const sl_notes *notes);

/* Write pretty JSON and a newline; releases root. */
sl_status jw_write(jw *w, json_object *root, FILE *fp);

#endif
