/*
 * strayline: small shared helpers used by every stage: strict number parsing,
 * owned strings, file hashing, bounded file reading and atomic output files.
 *
 * Number parsing is strict on purpose: a value such as "12abc", "", "nan" or
 * "1e999" in an input file must be an input error, never a silently wrong
 * number. Text is parsed in the "C" locale (the program never changes
 * LC_NUMERIC), so a decimal point is always '.'.
 */
#ifndef STRAYLINE_UTIL_H
#define STRAYLINE_UTIL_H

#include <stdbool.h>
#include <stddef.h>
#include <stdio.h>

#include "strayline/error.h"

#ifdef __cplusplus
extern "C" {
#endif

/* GSL reports errors through one process-wide handler whose default aborts.
 * Every module that calls GSL calls this first: it turns the handler off
 * once (so errors come back as codes), keeping a handler the host program
 * installed itself. Thread-safe. */
void sl_gsl_quiet(void);

/* Parse a whole string as a finite double (leading/trailing blanks allowed).
 * Returns false for empty text, trailing garbage, overflow, NaN or infinity. */
bool sl_parse_double(const char *text, double *out);

/* Parse a whole string as an int in [INT_MIN, INT_MAX]. */
bool sl_parse_int(const char *text, int *out);

/* The decimals to print v with (at least dec, at most 6) so that a value
 * below level never reads as the level: 49.97 printed "%.1f" is 50.0,
 * beside a status that says "below level 50.0". */
int sl_decimals_below(double v, double level, int dec);

/* strdup that accepts NULL (returns NULL) and reports allocation failure
 * through *ok (set to false, never set to true). */
char *sl_strdup(const char *s, bool *ok);

/* A name for a terminal: control characters written as \xNN, so that a ROI
 * name cannot move the cursor or hide text. Cut to `size`; returns out. */
const char *sl_text_escape(const char *in, char *out, size_t size);

/* Case-insensitive ASCII comparison, for DICOM code strings and ROI names. */
int sl_strcasecmp(const char *a, const char *b);

/* SHA-256 of a file as 64 lowercase hex digits plus NUL. */
#define SL_SHA256_HEX_LEN 65
sl_status sl_sha256_file(const char *path, char hex[SL_SHA256_HEX_LEN], sl_error *err);
void sl_sha256_buffer(const void *data, size_t n, char hex[SL_SHA256_HEX_LEN]);

/* Read a whole file into a NUL-terminated buffer, refusing files larger than
 * max_bytes (so a huge input cannot exhaust memory). */
sl_status sl_read_file(const char *path, size_t max_bytes, char **data, size_t *size,
                       sl_error *err);

/* True when two paths name the same existing file (same device and inode). */
bool sl_same_file(const char *a, const char *b);

/* An output file written atomically: data goes to a temporary file in the
 * same directory, and sl_outfile_commit() renames it over the target, so a
 * reader never sees half a report and a failed run leaves no partial file. */
typedef struct sl_outfile {
    FILE *fp;
    char *target;
    char *tmp;
} sl_outfile;

/* Open path for writing. `inputs` (may be NULL, count n_inputs) are files the
 * run reads: writing over any of them is refused with SL_EUSAGE. */
sl_status sl_outfile_open(sl_outfile *out, const char *path, const char *const *inputs,
                          size_t n_inputs, sl_error *err);
sl_status sl_outfile_commit(sl_outfile *out, sl_error *err);
void sl_outfile_abort(sl_outfile *out);

/* Growable byte buffer used by writers that build text in memory. */
typedef struct sl_buf {
    char *data;
    size_t len;
    size_t cap;
    bool failed; /* an allocation failed; further appends are ignored */
} sl_buf;

void sl_buf_printf(sl_buf *b, const char *fmt, ...)
#if defined(__GNUC__)
    __attribute__((format(printf, 2, 3)))
#endif
    ;
void sl_buf_append(sl_buf *b, const char *s, size_t n);
void sl_buf_free(sl_buf *b);

#ifdef __cplusplus
}
#endif

#endif
