/*
 * strayline's entry point: picks the command named by the first argument and
 * hands it the rest. Kept thin on purpose; the work is in the library.
 */
#include <stdarg.h>
#include <stdio.h>
#include <string.h>

#include "cli.h"
#include "strayline/dicom.h"
#include "strayline/version.h"

static const sl_command commands[] = {
    {"inspect", "summarise DICOM RT Plan and RT Structure Set files", sl_cmd_inspect},
    {"locate", "place each electron field in the patient: organ distances and depths",
     sl_cmd_locate},
    {"fit", "fit peripheral-dose models to measured profiles; write a model file", sl_cmd_fit},
    {"model", "show or evaluate a model file", sl_cmd_model},
    {"estimate", "estimate organ out-of-field doses and compare with action levels",
     sl_cmd_estimate},
    {"scan", "screen every electron plan of a folder; reports, summary and log", sl_cmd_scan},
    {"listen", "a DICOM node that screens the plans it receives", sl_cmd_listen},
    {"history", "list the screenings recorded in the screening log", sl_cmd_history},
};

static void usage(FILE *fp)
{
    fprintf(fp, "usage: strayline COMMAND [OPTIONS] [FILES]\n\n"
                "Screening estimates of out-of-field dose from electron beams.\n\n"
                "commands:\n");
    for (size_t i = 0; i < sizeof commands / sizeof *commands; i++)
        fprintf(fp, "  %-10s %s\n", commands[i].name, commands[i].summary);
    fprintf(fp, "\n'strayline COMMAND --help' describes a command.\n"
                "exit codes: 0 success, 1 internal or output error, 2 usage error,\n"
                "3 input error, 4 success with at least one organ flagged.\n");
}

int sl_cli_exit_code(sl_status st)
{
    switch (st) {
    case SL_OK: return SL_EXIT_OK;
    case SL_EINPUT: return SL_EXIT_INPUT;
    case SL_EUSAGE: return SL_EXIT_USAGE;
    case SL_ENOMEM:
    case SL_EIO:
    case SL_EINTERNAL: return SL_EXIT_INTERNAL;
    }
    return SL_EXIT_INTERNAL;
}

int sl_cli_fail(const sl_error *err)
{
    const char *kind = err->code == SL_EINPUT ? "" : sl_status_name(err->code);
    fprintf(stderr, "strayline: %s%s%s\n", kind, *kind ? ": " : "",
            err->msg[0] ? err->msg : "unknown failure");
    return sl_cli_exit_code(err->code);
}

int sl_cli_usage(const char *command, const char *fmt, ...)
{
    va_list ap;
    va_start(ap, fmt);
    fprintf(stderr, "strayline %s: ", command);
    vfprintf(stderr, fmt, ap);
    fprintf(stderr, " (see 'strayline %s --help')\n", command);
    va_end(ap);
    return SL_EXIT_USAGE;
}

int sl_cli_format(const char *command, const char *value, sl_format *fmt)
{
    if (sl_format_parse(value, fmt))
        return 1;
    sl_cli_usage(command, "unknown --format '%s' (text, json or csv)", value);
    return 0;
}

void sl_cli_warnings(const sl_notes *notes)
{
    for (size_t i = 0; notes && i < notes->count; i++)
        fprintf(stderr, "strayline: warning: %s\n", notes->items[i]);
}

int main(int argc, char **argv)
{
    if (argc < 2) {
        usage(stderr);
        return SL_EXIT_USAGE;
    }
    const char *name = argv[1];
    if (strcmp(name, "--help") == 0 || strcmp(name, "-h") == 0 || strcmp(name, "help") == 0) {
        usage(stdout);
        return SL_EXIT_OK;
    }
    if (strcmp(name, "--version") == 0) {
        printf("strayline %s (%s)\n", sl_version(), sl_dicom_toolkit_version());
        return SL_EXIT_OK;
    }
    for (size_t i = 0; i < sizeof commands / sizeof *commands; i++) {
        if (strcmp(name, commands[i].name) == 0)
            return commands[i].run(argc - 1, argv + 1);
    }
    fprintf(stderr, "strayline: unknown command '%s'\n", name);
    usage(stderr);
    return SL_EXIT_USAGE;
}
