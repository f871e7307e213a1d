/*
 * strayline's entry point: picks the command named by the first argument and
 * hands it the rest. Kept thin on purpose; the work is in the library.
 *
 * It also holds what every command shares, so that they behave alike: the
 * "strayline COMMAND: " prefix of every message (the command is set once,
 * here, before dispatch), the diagnosis of a bad option with a "did you
 * mean" for a mistyped long one, and "-" for standard output and standard
 * input.
 */
#include <errno.h>
#include <getopt.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "cli.h"
#include "strayline/dicom.h"
#include "strayline/model.h"
#include "strayline/report.h"
#include "strayline/util.h"
#include "strayline/version.h"

static const sl_command commands[] = {
    {"inspect", "summarise DICOM RT Plan and RT Structure Set files", sl_cmd_inspect, true},
    {"locate", "place each electron field in the patient: organ distances and depths",
     sl_cmd_locate, true},
    {"fit", "fit peripheral-dose models to measured profiles; write a model file", sl_cmd_fit,
     false},
    {"model", "show or evaluate a model file", sl_cmd_model, false},
    {"estimate", "estimate organ out-of-field doses and compare with action levels",
     sl_cmd_estimate, true},
    {"film", "film dosimetry: calibrate film scans, turn film scans into profiles", sl_cmd_film,
     true},
    {"scan", "screen every electron plan of a folder; reports, summary and log", sl_cmd_scan,
     false},
    {"listen", "a DICOM node that screens the plans it receives", sl_cmd_listen, false},
    {"history", "list the screenings recorded in the screening log", sl_cmd_history, false},
    {"invivo", "in-vivo readings against the estimate: add to the log, report, propose a model",
     sl_cmd_invivo, false},
};

static void usage(FILE *fp)
{
    fprintf(fp, "usage: strayline COMMAND [OPTIONS] [FILES]\n\n"
                "Screening estimates of out-of-field dose from electron beams.\n\n"
                "commands:\n");
    for (size_t i = 0; i < sizeof commands / sizeof *commands; i++)
        fprintf(fp, "  %-10s %s\n", commands[i].name, commands[i].summary);
    fprintf(fp, "\n'strayline help COMMAND' or 'strayline COMMAND --help' describes a command.\n"
                "A FILE given as '-' is standard input; an output given as '-' is standard\n"
                "output.\n"
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

/* The command being run; the CLI layer runs one command a process. */
static const char *current_command;

void sl_cli_set_command(const char *name)
{
    current_command = name;
}

const char *sl_cli_command(void)
{
    return current_command;
}

static void prefix(void)
{
    if (current_command)
        fprintf(stderr, "strayline %s: ", current_command);
    else
        fputs("strayline: ", stderr);
}

void sl_cli_error(const char *fmt, ...)
{
    va_list ap;
    va_start(ap, fmt);
    prefix();
    vfprintf(stderr, fmt, ap);
    fputc('\n', stderr);
    va_end(ap);
}

int sl_cli_fail(const sl_error *err)
{
    const char *kind = err->code == SL_EINPUT ? "" : sl_status_name(err->code);
    sl_cli_error("%s%s%s", kind, *kind ? ": " : "", err->msg[0] ? err->msg : "unknown failure");
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

/* Edit distance with adjacent transpositions (optimal string alignment),
 * for "did you mean": "--fromat" is one step from "--format". Names are
 * short; longer ones are cut, which only weakens a suggestion. */
static size_t edit_distance(const char *a, const char *b)
{
    enum { MAXN = 64 };
    size_t n = strlen(a), m = strlen(b);
    if (n > MAXN - 1)
        n = MAXN - 1;
    if (m > MAXN - 1)
        m = MAXN - 1;
    size_t d[MAXN][MAXN];
    for (size_t i = 0; i <= n; i++)
        d[i][0] = i;
    for (size_t j = 0; j <= m; j++)
        d[0][j] = j;
    for (size_t i = 1; i <= n; i++) {
        for (size_t j = 1; j <= m; j++) {
            size_t cost = a[i - 1] != b[j - 1];
            size_t v = d[i - 1][j] + 1;
            if (d[i][j - 1] + 1 < v)
                v = d[i][j - 1] + 1;
            if (d[i - 1][j - 1] + cost < v)
                v = d[i - 1][j - 1] + cost;
            if (i > 1 && j > 1 && a[i - 1] == b[j - 2] && a[i - 2] == b[j - 1] &&
                d[i - 2][j - 2] + 1 < v)
                v = d[i - 2][j - 2] + 1;
            d[i][j] = v;
        }
    }
    return d[n][m];
}

/* The closest of `names` to `word`, or NULL when none is close enough to be
 * a plausible typo: at most 2 edits, and fewer than half the word's length. */
const char *sl_cli_closest(const char *word, const char *const *names, size_t n)
{
    const char *best = NULL;
    size_t best_d = (size_t)-1;
    for (size_t i = 0; i < n; i++) {
        size_t dd = edit_distance(word, names[i]);
        if (dd < best_d) {
            best_d = dd;
            best = names[i];
        }
    }
    size_t len = strlen(word);
    return best && best_d <= 2 && 2 * best_d < len ? best : NULL;
}

int sl_cli_bad_option(char **argv, const struct option *opts, const char *shortopts)
{
    const char *cmd = current_command ? current_command : "COMMAND";
    const char *arg = optind > 0 ? argv[optind - 1] : NULL;
    if (arg && strncmp(arg, "--", 2) == 0 && arg[2]) {
        char name[128];
        size_t len = strcspn(arg + 2, "=");
        if (len >= sizeof name)
            len = sizeof name - 1;
        memcpy(name, arg + 2, len);
        name[len] = '\0';
        bool has_value = arg[2 + strcspn(arg + 2, "=")] == '=';
        const char *names[64];
        size_t n = 0, nprefix = 0;
        char matches[512] = "";
        for (const struct option *o = opts; o->name && n < 64; o++) {
            names[n++] = o->name;
            if (strcmp(o->name, name) == 0) {
                if (o->has_arg == no_argument && has_value)
                    return sl_cli_usage(cmd, "--%s takes no value", o->name);
                return sl_cli_usage(cmd, "--%s needs a value", o->name);
            }
            if (strncmp(o->name, name, len) == 0) {
                nprefix++;
                size_t used = strlen(matches);
                snprintf(matches + used, sizeof matches - used, "%s--%s", used ? ", " : "",
                         o->name);
            }
        }
        /* getopt_long takes a unique abbreviation; several make it ambiguous */
        if (nprefix > 1)
            return sl_cli_usage(cmd, "--%s is ambiguous: %s", name, matches);
        if (nprefix == 1) {
            for (const struct option *o = opts; o->name; o++) {
                if (strncmp(o->name, name, len) == 0)
                    return sl_cli_usage(cmd, o->has_arg == no_argument && has_value
                                                 ? "--%s takes no value"
                                                 : "--%s needs a value",
                                        o->name);
            }
        }
        const char *near = sl_cli_closest(name, names, n);
        if (near)
            return sl_cli_usage(cmd, "unknown option --%s: did you mean --%s?", name, near);
        return sl_cli_usage(cmd, "unknown option --%s", name);
    }
    const char *pos = optopt > 0 && optopt < 128 ? strchr(shortopts, optopt) : NULL;
    if (pos && optopt != ':') {
        for (const struct option *o = opts; o->name; o++) {
            if (o->val == optopt)
                return sl_cli_usage(cmd, "-%c (--%s) needs a value", optopt, o->name);
        }
        return sl_cli_usage(cmd, "-%c needs a value", optopt);
    }
    if (optopt > 32 && optopt < 127)
        return sl_cli_usage(cmd, "unknown option -%c", optopt);
    return sl_cli_usage(cmd, "unknown option '%s'", arg ? arg : "?");
}

bool sl_cli_is_stdio(const char *arg)
{
    return arg && strcmp(arg, "-") == 0;
}

sl_status sl_cli_output_open(sl_outfile *out, const char *path, const char *const *inputs,
                             size_t n_inputs, sl_error *err)
{
    if (!sl_cli_is_stdio(path))
        return sl_outfile_open(out, path, inputs, n_inputs, err);
    memset(out, 0, sizeof *out);
    out->fp = stdout;
    return SL_OK;
}

sl_status sl_cli_output_commit(sl_outfile *out, sl_error *err)
{
    if (out->fp != stdout)
        return sl_outfile_commit(out, err);
    out->fp = NULL;
    if (fflush(stdout) != 0 || ferror(stdout))
        return sl_error_set(err, SL_EIO, "cannot write to standard output");
    return SL_OK;
}

void sl_cli_output_abort(sl_outfile *out)
{
    if (out->fp == stdout) {
        /* what went out cannot be taken back; the exit code says it failed */
        fflush(stdout);
        out->fp = NULL;
        return;
    }
    sl_outfile_abort(out);
}

sl_status sl_cli_read_stdin(size_t max_bytes, char **data, size_t *size, sl_error *err)
{
    *data = NULL;
    *size = 0;
    size_t cap = 1 << 16, n = 0;
    char *buf = malloc(cap + 1);
    if (!buf)
        return sl_error_set(err, SL_ENOMEM, "standard input: out of memory");
    for (;;) {
        if (n == cap) {
            if (cap > max_bytes) {
                free(buf);
                return sl_error_set(err, SL_EINPUT,
                                    "standard input: more than the limit of %zu bytes", max_bytes);
            }
            char *b = realloc(buf, 2 * cap + 1);
            if (!b) {
                free(buf);
                return sl_error_set(err, SL_ENOMEM, "standard input: out of memory");
            }
            buf = b;
            cap *= 2;
        }
        size_t got = fread(buf + n, 1, cap - n, stdin);
        n += got;
        if (got == 0)
            break;
    }
    if (ferror(stdin)) {
        int e = errno;
        free(buf);
        return sl_error_set(err, SL_EINPUT, "standard input: cannot read: %s", strerror(e));
    }
    if (n > max_bytes) {
        free(buf);
        return sl_error_set(err, SL_EINPUT, "standard input: more than the limit of %zu bytes",
                            max_bytes);
    }
    buf[n] = '\0';
    *data = buf;
    *size = n;
    return SL_OK;
}

sl_status sl_cli_read_dicom(const char *arg, sl_dicom_object *out, sl_error *err)
{
    if (!sl_cli_is_stdio(arg))
        return sl_dicom_read(arg, out, err);
    char *data;
    size_t n;
    sl_status st = sl_cli_read_stdin(SL_DICOM_MAX_FILE_BYTES, &data, &n, err);
    if (st != SL_OK)
        return st;
    st = sl_dicom_read_buffer(data, n, SL_CLI_STDIN_NAME, out, err);
    free(data);
    return st;
}

sl_status sl_cli_read_plan(const char *arg, sl_plan **out, sl_error *err)
{
    *out = NULL;
    if (!sl_cli_is_stdio(arg))
        return sl_dicom_read_plan(arg, out, err);
    sl_dicom_object obj;
    sl_status st = sl_cli_read_dicom(arg, &obj, err);
    if (st != SL_OK)
        return st;
    if (obj.kind != SL_DICOM_RTPLAN) {
        sl_dicom_object_free(&obj);
        return sl_error_set(err, SL_EINPUT, "%s: is an RT Structure Set, an RT Plan was expected",
                            SL_CLI_STDIN_NAME);
    }
    *out = obj.plan;
    return SL_OK;
}

sl_status sl_cli_read_structures(const char *arg, sl_structure_set **out, sl_error *err)
{
    *out = NULL;
    if (!sl_cli_is_stdio(arg))
        return sl_dicom_read_structures(arg, out, err);
    sl_dicom_object obj;
    sl_status st = sl_cli_read_dicom(arg, &obj, err);
    if (st != SL_OK)
        return st;
    if (obj.kind != SL_DICOM_RTSTRUCT) {
        sl_dicom_object_free(&obj);
        return sl_error_set(err, SL_EINPUT, "%s: is an RT Plan, an RT Structure Set was expected",
                            SL_CLI_STDIN_NAME);
    }
    *out = obj.structures;
    return SL_OK;
}

sl_status sl_cli_read_model(const char *arg, sl_model **out, sl_error *err)
{
    if (!sl_cli_is_stdio(arg))
        return sl_model_load(arg, out, err);
    *out = NULL;
    char *data;
    size_t n;
    sl_status st = sl_cli_read_stdin(SL_YAML_MAX_BYTES, &data, &n, err);
    if (st != SL_OK)
        return st;
    st = sl_model_load_buffer(data, n, SL_CLI_STDIN_NAME, out, err);
    free(data);
    return st;
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
        sl_cli_error("warning: %s", notes->items[i]);
}

static const sl_command *find_command(const char *name)
{
    for (size_t i = 0; i < sizeof commands / sizeof *commands; i++) {
        if (strcmp(name, commands[i].name) == 0)
            return &commands[i];
    }
    return NULL;
}

static int unknown_command(const char *name)
{
    const char *names[sizeof commands / sizeof *commands];
    for (size_t i = 0; i < sizeof commands / sizeof *commands; i++)
        names[i] = commands[i].name;
    const char *near = sl_cli_closest(name, names, sizeof commands / sizeof *commands);
    if (near)
        fprintf(stderr, "strayline: unknown command '%s': did you mean %s?\n", name, near);
    else
        fprintf(stderr, "strayline: unknown command '%s'\n", name);
    usage(stderr);
    return SL_EXIT_USAGE;
}

int main(int argc, char **argv)
{
    if (argc < 2) {
        usage(stderr);
        return SL_EXIT_USAGE;
    }
    /* every command explains a bad option itself (sl_cli_bad_option) */
    opterr = 0;
    const char *name = argv[1];
    if (strcmp(name, "--help") == 0 || strcmp(name, "-h") == 0 ||
        (strcmp(name, "help") == 0 && argc == 2)) {
        usage(stdout);
        return SL_EXIT_OK;
    }
    if (strcmp(name, "help") == 0) {
        /* `strayline help COMMAND` is `strayline COMMAND --help` */
        const sl_command *cmd = find_command(argv[2]);
        if (!cmd || argc > 3)
            return cmd ? sl_cli_usage("help", "takes one command") : unknown_command(argv[2]);
        char *args[] = {argv[2], (char *)"--help", NULL};
        sl_cli_set_command(cmd->name);
        return cmd->run(2, args);
    }
    if (strcmp(name, "--version") == 0) {
        printf("strayline %s (%s)\n", sl_version(), sl_dicom_toolkit_version());
        return SL_EXIT_OK;
    }
    const sl_command *cmd = find_command(name);
    if (!cmd)
        return unknown_command(name);
    sl_cli_set_command(cmd->name);
    if (cmd->one_case)
        sl_cli_memory_one_case();
    int rc = cmd->run(argc - 1, argv + 1);
    sl_report_release_caches();
    return rc;
}
