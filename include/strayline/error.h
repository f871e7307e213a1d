/*
 * strayline: error codes, error records and warning lists.
 *
 * Every library function that can fail returns one of the sl_status codes and,
 * on failure, fills an sl_error with a one-line message of the form
 * "FILE: ELEMENT: what was wrong". The library never prints and never exits:
 * only the command-line layer turns a status into a message and an exit code.
 * Warnings that do not stop the work are collected in an sl_notes list that
 * travels with the data they concern, so that every report can repeat them.
 */
#ifndef STRAYLINE_ERROR_H
#define STRAYLINE_ERROR_H

#include <stddef.h>

#ifdef __cplusplus
extern "C" {
#endif

typedef enum sl_status {
    SL_OK = 0,
    SL_EINPUT,    /* bad, unsupported or incomplete input file or value */
    SL_EUSAGE,    /* the caller asked for something that makes no sense */
    SL_ENOMEM,    /* allocation failed */
    SL_EIO,       /* an output could not be written */
    SL_EINTERNAL  /* a bug: an invariant of the library did not hold */
} sl_status;

#define SL_ERROR_MSG_MAX 1024

typedef struct sl_error {
    sl_status code;
    char msg[SL_ERROR_MSG_MAX];
} sl_error;

/* Record an error (printf-style message) and return its code, so that a
 * caller can write `return sl_error_set(err, SL_EINPUT, "...")`. A NULL err
 * is allowed and only the code is returned. */
sl_status sl_error_set(sl_error *err, sl_status code, const char *fmt, ...)
#if defined(__GNUC__)
    __attribute__((format(printf, 3, 4)))
#endif
    ;

/* Put "prefix: " in front of an existing message (used to add the file name
 * once a lower layer has named the element). */
void sl_error_prefix(sl_error *err, const char *prefix);

void sl_error_clear(sl_error *err);

/* Name of a status, for internal messages. */
const char *sl_status_name(sl_status code);

/* A growing list of warning strings. Zero-initialise before use. */
typedef struct sl_notes {
    char **items;
    size_t count;
    size_t capacity;
} sl_notes;

/* Append a formatted note. Returns SL_ENOMEM on allocation failure. Adding
 * the same text twice keeps one copy: warnings repeat per beam or organ. */
sl_status sl_notes_add(sl_notes *notes, const char *fmt, ...)
#if defined(__GNUC__)
    __attribute__((format(printf, 2, 3)))
#endif
    ;

/* Append every note of src to dst (skipping duplicates). */
sl_status sl_notes_extend(sl_notes *dst, const sl_notes *src);

void sl_notes_free(sl_notes *notes);

#ifdef __cplusplus
}
#endif

#endif
