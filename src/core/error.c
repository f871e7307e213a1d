/*
 * Error records and note lists (see include/strayline/error.h).
 *
 * Messages are bounded: a message longer than the record is cut, never
 * overflowed, because inputs (file names, DICOM strings) can be long.
 */
#include "strayline/error.h"

#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

sl_status sl_error_set(sl_error *err, sl_status code, const char *fmt, ...)
{
    if (err) {
        va_list ap;
        va_start(ap, fmt);
        vsnprintf(err->msg, sizeof err->msg, fmt, ap);
        va_end(ap);
        err->code = code;
    }
    return code;
}

void sl_error_prefix(sl_error *err, const char *prefix)
{
    if (!err || !prefix)
        return;
    char tmp[SL_ERROR_MSG_MAX];
    snprintf(tmp, sizeof tmp, "%s: %s", prefix, err->msg);
    memcpy(err->msg, tmp, sizeof tmp);
}

void sl_error_clear(sl_error *err)
{
    if (err) {
        err->code = SL_OK;
        err->msg[0] = '\0';
    }
}

const char *sl_status_name(sl_status code)
{
    switch (code) {
    case SL_OK: return "ok";
    case SL_EINPUT: return "input error";
    case SL_EUSAGE: return "usage error";
    case SL_ENOMEM: return "out of memory";
    case SL_EIO: return "output error";
    case SL_EINTERNAL: return "internal error";
    }
    return "unknown status";
}

static sl_status notes_push(sl_notes *notes, char *text)
{
    for (size_t i = 0; i < notes->count; i++) {
        if (strcmp(notes->items[i], text) == 0) {
            free(text);
            return SL_OK;
        }
    }
    if (notes->count == notes->capacity) {
        size_t cap = notes->capacity ? notes->capacity * 2 : 8;
        char **items = realloc(notes->items, cap * sizeof *items);
        if (!items) {
            free(text);
            return SL_ENOMEM;
        }
        notes->items = items;
        notes->capacity = cap;
    }
    notes->items[notes->count++] = text;
    return SL_OK;
}

sl_status sl_notes_add(sl_notes *notes, const char *fmt, ...)
{
    va_list ap;
    va_start(ap, fmt);
    int n = vsnprintf(NULL, 0, fmt, ap);
    va_end(ap);
    if (n < 0)
        return SL_EINTERNAL;
    char *text = malloc((size_t)n + 1);
    if (!text)
        return SL_ENOMEM;
    va_start(ap, fmt);
    vsnprintf(text, (size_t)n + 1, fmt, ap);
    va_end(ap);
    return notes_push(notes, text);
}

sl_status sl_notes_extend(sl_notes *dst, const sl_notes *src)
{
    for (size_t i = 0; i < src->count; i++) {
        sl_status st = sl_notes_add(dst, "%s", src->items[i]);
        if (st != SL_OK)
            return st;
    }
    return SL_OK;
}

void sl_notes_free(sl_notes *notes)
{
    if (!notes)
        return;
    for (size_t i = 0; i < notes->count; i++)
        free(notes->items[i]);
    free(notes->items);
    notes->items = NULL;
    notes->count = notes->capacity = 0;
}
