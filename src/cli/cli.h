/*
 * The command-line layer: shared declarations. Each command lives in its own
 * cmd_*.c file, parses its options with getopt_long (so options may stand
 * before or after the file arguments), calls the library stages in order and
 * maps a status to an exit code. Only this layer prints.
 */
#ifndef STRAYLINE_CLI_H
#define STRAYLINE_CLI_H

#include <stdio.h>

#include "strayline/error.h"
#include "strayline/report.h"

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
} sl_command;

int sl_cmd_inspect(int argc, char **argv);
int sl_cmd_locate(int argc, char **argv);
int sl_cmd_fit(int argc, char **argv);
int sl_cmd_model(int argc, char **argv);
int sl_cmd_estimate(int argc, char **argv);
int sl_cmd_scan(int argc, char **argv);
int sl_cmd_history(int argc, char **argv);
int sl_cmd_listen(int argc, char **argv);

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

/* Print warnings as "strayline: warning: ..." lines on stderr. */
void sl_cli_warnings(const sl_notes *notes);

#endif
