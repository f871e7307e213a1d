/*
 * The command-line layer: shared declarations. Each command lives in its own
 * cmd_*.c file, parses its options with getopt_long (so options may stand
 * before or after the file arguments), calls the library stages in order and
 * maps a status to an exit code. Only this layer prints.
 */
#ifndef STRAYLINE_CLI_H
#define STRAYLINE_CLI_H

#include <getopt.h>
#include <stdbool.h>
#include <stdio.h>

#include "strayline/dicom.h"
#include "strayline/error.h"
#include "strayline/model.h"
#include "strayline/report.h"
#include "strayline/util.h"

/* Exit codes, documented in README.md. */
enum {
    SL_EXIT_OK = 0,
    SL_EXIT_INTERNAL = 1,
    SL_EXIT_USAGE = 2,
    SL_EXIT_INPUT = 3,
    SL_EXIT_FLAGGED = 4
};

typedef struct sl_command {
    const char *name;
    const char *summary;
    int (*run)(int argc, char **argv);
    bool one_case; /* works through one case and exits: sl_cli_memory_one_case */
} sl_command;

/* Memory taken in large steps, with huge pages, for a command that works
 * through one case (memory.c says why). Call before the command runs. */
void sl_cli_memory_one_case(void);

int sl_cmd_inspect(int argc, char **argv);
int sl_cmd_locate(int argc, char **argv);
int sl_cmd_fit(int argc, char **argv);
int sl_cmd_model(int argc, char **argv);
int sl_cmd_estimate(int argc, char **argv);
int sl_cmd_film(int argc, char **argv);
int sl_cmd_scan(int argc, char **argv);
int sl_cmd_history(int argc, char **argv);
int sl_cmd_invivo(int argc, char **argv);
int sl_cmd_listen(int argc, char **argv);

/* The command being run (set once by main before dispatch): every message
 * starts "strayline COMMAND: ". */
void sl_cli_set_command(const char *name);
const char *sl_cli_command(void);

/* Print "strayline COMMAND: message" as one line on stderr. */
void sl_cli_error(const char *fmt, ...)
#if defined(__GNUC__)
    __attribute__((format(printf, 1, 2)))
#endif
    ;

/* Print the error as one line on stderr; return the matching exit code. */
int sl_cli_fail(const sl_error *err);
int sl_cli_exit_code(sl_status st);

/* Print "strayline COMMAND: message" and a pointer to --help; return 2. */
int sl_cli_usage(const char *command, const char *fmt, ...)
#if defined(__GNUC__)
    __attribute__((format(printf, 2, 3)))
#endif
    ;

/* Parse a --format value into *fmt; print a usage error and return false. */
int sl_cli_format(const char *command, const char *value, sl_format *fmt);

/* Print warnings as "strayline COMMAND: warning: ..." lines on stderr. */
void sl_cli_warnings(const sl_notes *notes);

/* The error branch of a getopt_long loop (main sets opterr = 0): say what was
 * wrong with the option just read (unknown, ambiguous, missing or unwanted
 * value) and, for a mistyped long option, the closest one ("did you mean
 * --format?"); return 2. */
int sl_cli_bad_option(char **argv, const struct option *opts, const char *shortopts);

/* The one of `names` a mistyped `word` most plausibly meant (at most 2 edits,
 * transpositions counted as one), or NULL. */
const char *sl_cli_closest(const char *word, const char *const *names, size_t n);

/* "-" for a file: standard input where a file is read, standard output where
 * one is written. */
#define SL_CLI_STDIN_NAME "standard input"
bool sl_cli_is_stdio(const char *arg);

/* An output: a file written atomically (sl_outfile_*), or standard output
 * for "-" (then commit only flushes it). */
sl_status sl_cli_output_open(sl_outfile *out, const char *path, const char *const *inputs,
                             size_t n_inputs, sl_error *err);
sl_status sl_cli_output_commit(sl_outfile *out, sl_error *err);
void sl_cli_output_abort(sl_outfile *out);

/* Inputs that may be "-": all of standard input, bounded like a file. */
sl_status sl_cli_read_stdin(size_t max_bytes, char **data, size_t *size, sl_error *err);
sl_status sl_cli_read_dicom(const char *arg, sl_dicom_object *out, sl_error *err);
sl_status sl_cli_read_plan(const char *arg, sl_plan **out, sl_error *err);
sl_status sl_cli_read_structures(const char *arg, sl_structure_set **out, sl_error *err);
sl_status sl_cli_read_model(const char *arg, sl_model **out, sl_error *err);

#endif
