/*
 * JSON writing helpers over json-c (see jsonw.h for the non-finite rule).
 */
#include "jsonw.h"

#include <math.h>
#include <stdio.h>

static bool jw_ok(jw *w)
{
    return w->st == SL_OK;
}

static void jw_fail(jw *w, sl_status st, const char *what)
{
    if (jw_ok(w))
        w->st = sl_error_set(w->err, st, "%s", what);
}

json_object *jw_number(jw *w, double v, const char *what)
{
    if (!jw_ok(w))
        return NULL;
    if (!isfinite(v)) {
        char msg[256];
        snprintf(msg, sizeof msg,
                 "report refused a non-finite value for '%s' (a bug: please report it)", what);
        jw_fail(w, SL_EINTERNAL, msg);
        return NULL;
    }
    char buf[40];
    if (v == 0.0)
        v = 0.0; /* no "-0" in reports */
    snprintf(buf, sizeof buf, "%.*g", JW_DIGITS, v);
    json_object *o = json_object_new_double_s(v, buf);
    if (!o)
        jw_fail(w, SL_ENOMEM, "out of memory writing JSON");
    return o;
}

void jw_put(jw *w, json_object *obj, const char *key, json_object *val)
{
    if (!jw_ok(w)) {
        json_object_put(val);
        return;
    }
    if (json_object_object_add(obj, key, val) != 0) {
        json_object_put(val);
        jw_fail(w, SL_ENOMEM, "out of memory writing JSON");
    }
}

void jw_num(jw *w, json_object *obj, const char *key, double v)
{
    json_object *o = jw_number(w, v, key);
    if (o)
        jw_put(w, obj, key, o);
}

void jw_num_opt(jw *w, json_object *obj, const char *key, double v)
{
    if (isnan(v))
        jw_put(w, obj, key, NULL);
    else
        jw_num(w, obj, key, v);
}

void jw_int(jw *w, json_object *obj, const char *key, long long v)
{
    if (!jw_ok(w))
        return;
    json_object *o = json_object_new_int64(v);
    if (!o)
        jw_fail(w, SL_ENOMEM, "out of memory writing JSON");
    else
        jw_put(w, obj, key, o);
}

void jw_str(jw *w, json_object *obj, const char *key, const char *s)
{
    if (!jw_ok(w))
        return;
    if (!s) {
        jw_put(w, obj, key, NULL);
        return;
    }
    json_object *o = json_object_new_string(s);
    if (!o)
        jw_fail(w, SL_ENOMEM, "out of memory writing JSON");
    else
        jw_put(w, obj, key, o);
}

void jw_bool(jw *w, json_object *obj, const char *key, bool v)
{
    if (!jw_ok(w))
        return;
    jw_put(w, obj, key, json_object_new_boolean(v));
}

void jw_append(jw *w, json_object *arr, json_object *val)
{
    if (!jw_ok(w)) {
        json_object_put(val);
        return;
    }
    if (json_object_array_add(arr, val) != 0) {
        json_object_put(val);
        jw_fail(w, SL_ENOMEM, "out of memory writing JSON");
    }
}

json_object *jw_notes(jw *w, const sl_notes *notes)
{
    json_object *arr = json_object_new_array();
    if (!arr) {
        jw_fail(w, SL_ENOMEM, "out of memory writing JSON");
        return NULL;
    }
    for (size_t i = 0; notes && i < notes->count; i++)
        jw_append(w, arr, json_object_new_string(notes->items[i]));
    return arr;
}

sl_status jw_write(jw *w, json_object *root, FILE *fp)
{
    if (jw_ok(w)) {
        const char *text = json_object_to_json_string_ext(
            root, JSON_C_TO_STRING_PRETTY | JSON_C_TO_STRING_SPACED | JSON_C_TO_STRING_NOSLASHESCAPE);
        if (!text)
            jw_fail(w, SL_ENOMEM, "out of memory writing JSON");
        else if (fputs(text, fp) < 0 || fputc('\n', fp) < 0)
            jw_fail(w, SL_EIO, "cannot write the JSON output");
    }
    json_object_put(root);
    return w->st;
}
