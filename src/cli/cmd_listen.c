/*
 * `strayline listen --port N --ae-title TITLE --allow-aet CALLER --model
 * MODEL.yaml --out OUTDIR`: a DICOM node that screens what a planning
 * system sends it. The DICOM node (storescp.h) stores objects; the main
 * loop here pairs and screens them (sl_node_step) and prints the log lines,
 * with UTC timestamps and without patient names. SIGTERM and SIGINT stop it
 * after the current associations. At start-up it screens what an earlier
 * run left in its store and the screening log has no screening of.
 */
#include <errno.h>
#include <getopt.h>
#include <libgen.h>
#include <pthread.h>
#include <signal.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <time.h>

#include "cli.h"
#include "strayline/scan.h"
#include "strayline/storescp.h"
#include "strayline/util.h"

static const char help[] =
    "usage: strayline listen --port N --ae-title TITLE --allow-aet CALLER\n"
    "                        --model MODEL.yaml --out OUTDIR [OPTIONS]\n\n"
    "A DICOM Storage node (SCP) for RT Plans and RT Structure Sets. Objects\n"
    "received are stored in OUTDIR/received/ under their SOP Instance UIDs;\n"
    "when a plan and its structure set have both arrived (in either order, in\n"
    "one association or several) the plan is screened as 'scan' does: JSON and\n"
    "HTML reports, the summary (index.html, summary.csv, summary.json) and the\n"
    "screening log. At start-up, plans an earlier run left in OUTDIR/received/\n"
    "that the screening log has not seen are paired and screened too.\n"
    "Only calling AE titles on the allow list are accepted; with\n"
    "no allow list the node does not start. The node holds patient data: run it\n"
    "on the clinic's internal network only. SIGTERM or SIGINT (Ctrl-C) stops it\n"
    "after the current associations.\n\n"
    "  -p, --port N            TCP port to listen on (required)\n"
    "  -a, --ae-title TITLE    this node's AE title (required)\n"
    "  -A, --allow-aet CALLER  a calling AE title to accept (repeatable)\n"
    "      --allow-file FILE   calling AE titles to accept, one a line (# comments)\n"
    "  -m, --model FILE        the machine's model file (required)\n"
    "  -o, --out DIR           output folder (required; created if absent)\n"
    "  -l, --levels FILE       action-level table (default: action-levels.yaml\n"
    "                          beside the model file)\n"
    "  -L, --log FILE          screening log (default: OUTDIR/screening.sqlite)\n"
    "      --facts FILE        per-patient facts (YAML), as for 'scan'\n"
    "      --pdf               also the printable PDF report of each plan\n"
    "      --paper SIZE        a4 (default) or letter, for --pdf\n"
    "      --incomplete-after S  report a plan whose structure set has not\n"
    "                          arrived after S seconds (default 600)\n"
    "      --max-associations N  associations at once (default 32)\n"
    "      --timeout S         network timeout of a silent peer (default 60 s)\n"
    "  -h, --help              this help\n";

enum { OPT_ALLOW_FILE = 256, OPT_FACTS, OPT_INCOMPLETE, OPT_MAXASSOC, OPT_TIMEOUT, OPT_PDF,
       OPT_PAPER };

#define MAX_ALLOWED 256

static volatile sig_atomic_t stop_requested;

static void on_signal(int sig)
{
    (void)sig;
    stop_requested = 1;
}

static pthread_mutex_t print_lock = PTHREAD_MUTEX_INITIALIZER;

/* One log line: command, UTC timestamp, text (already free of names). */
static void logline(const char *fmt, ...)
#if defined(__GNUC__)
    __attribute__((format(printf, 1, 2)))
#endif
    ;
static void logline(const char *fmt, ...)
{
    char when[32];
    time_t t = time(NULL);
    struct tm tm;
    gmtime_r(&t, &tm);
    strftime(when, sizeof when, "%Y-%m-%dT%H:%M:%SZ", &tm);
    va_list ap;
    va_start(ap, fmt);
    pthread_mutex_lock(&print_lock);
    fprintf(stderr, "strayline listen: %s ", when);
    vfprintf(stderr, fmt, ap);
    fputc('\n', stderr);
    fflush(stderr);
    pthread_mutex_unlock(&print_lock);
    va_end(ap);
}

static void on_event(const sl_scp_event *ev, void *ctx)
{
    sl_node *node = ctx;
    logline("%s", ev->text);
    if (ev->kind == SL_SCP_EV_STORED && sl_node_received(node, ev->path) != SL_OK)
        logline("out of memory: %s will not be paired", ev->path);
}

static void on_entry(const sl_batch_entry *e, void *ctx)
{
    (void)ctx;
    char a[80], b[80];
    sl_text_escape(e->patient_id ? e->patient_id : "-", a, sizeof a);
    sl_text_escape(e->plan_label ? e->plan_label : "-", b, sizeof b);
    if (e->outcome == SL_OUT_SCREENED)
        logline("screened patient ID %s plan %s (%s): %s; reports %s, %s", a, b,
                e->plan_uid ? e->plan_uid : "", e->flagged ? "FLAGGED" : "no organ flagged",
                e->report_html ? e->report_html : "-", e->report_json ? e->report_json : "-");
    else
        logline("%s: patient ID %s plan %s (%s): %s", sl_outcome_name(e->outcome), a, b,
                e->plan_uid ? e->plan_uid : (e->plan_path ? e->plan_path : ""),
                e->message ? e->message : "");
}

static double monotonic_s(void)
{
    struct timespec ts;
    clock_gettime(CLOCK_MONOTONIC, &ts);
    return (double)ts.tv_sec + ts.tv_nsec * 1e-9;
}

/* Calling AE titles from a file: one a line, blank lines and # comments skipped. */
static int read_allow_file(const char *path, char **allowed, size_t *n)
{
    FILE *fp = fopen(path, "r");
    if (!fp) {
        sl_cli_error("%s: cannot open: %s", path, strerror(errno));
        return SL_EXIT_INPUT;
    }
    char line[256];
    int lineno = 0;
    while (fgets(line, sizeof line, fp)) {
        lineno++;
        size_t len = strcspn(line, "\r\n");
        if (line[len] == '\0' && !feof(fp)) {
            sl_cli_error("%s: line %d: longer than an AE title can be", path,
                    lineno);
            fclose(fp);
            return SL_EXIT_INPUT;
        }
        line[len] = '\0';
        char *s = line;
        while (*s == ' ' || *s == '\t')
            s++;
        char *end = s + strlen(s);
        while (end > s && (end[-1] == ' ' || end[-1] == '\t'))
            *--end = '\0';
        if (!*s || *s == '#')
            continue;
        if (!sl_ae_title_valid(s) || *n == MAX_ALLOWED) {
            sl_cli_error("%s: line %d: '%s' is not an AE title (1 to 16 printable "
                         "characters, no backslash)",
                    path, lineno, s);
            fclose(fp);
            return SL_EXIT_INPUT;
        }
        if (!(allowed[(*n)++] = strdup(s))) {
            fclose(fp);
            return SL_EXIT_INTERNAL;
        }
    }
    fclose(fp);
    return SL_EXIT_OK;
}

int sl_cmd_listen(int argc, char **argv)
{
    static const struct option opts[] = {
        {"port", required_argument, NULL, 'p'},
        {"ae-title", required_argument, NULL, 'a'},
        {"allow-aet", required_argument, NULL, 'A'},
        {"allow-file", required_argument, NULL, OPT_ALLOW_FILE},
        {"model", required_argument, NULL, 'm'},
        {"out", required_argument, NULL, 'o'},
        {"levels", required_argument, NULL, 'l'},
        {"log", required_argument, NULL, 'L'},
        {"facts", required_argument, NULL, OPT_FACTS},
        {"incomplete-after", required_argument, NULL, OPT_INCOMPLETE},
        {"max-associations", required_argument, NULL, OPT_MAXASSOC},
        {"timeout", required_argument, NULL, OPT_TIMEOUT},
        {"pdf", no_argument, NULL, OPT_PDF},
        {"paper", required_argument, NULL, OPT_PAPER},
        {"help", no_argument, NULL, 'h'},
        {NULL, 0, NULL, 0},
    };
    const char *model_path = NULL, *outdir = NULL, *levels_path = NULL, *log_path = NULL,
               *facts_path = NULL, *ae = NULL;
    char *allowed[MAX_ALLOWED];
    size_t nallowed = 0;
    int port = 0, maxassoc = 32, timeout = 60, c, rc = SL_EXIT_OK;
    double incomplete_s = 600;
    bool pdf = false;
    const char *paper = "a4";
    optind = 1;
    static const char shortopts[] = "p:a:A:m:o:l:L:h";
    while ((c = getopt_long(argc, argv, shortopts, opts, NULL)) != -1) {
        switch (c) {
        case 'p':
            if (!sl_parse_int(optarg, &port) || port < 1 || port > 65535)
                rc = sl_cli_usage("listen", "--port needs a TCP port from 1 to 65535");
            break;
        case 'a':
            if (!sl_ae_title_valid(optarg))
                rc = sl_cli_usage("listen", "--ae-title '%s': 1 to 16 printable characters, no "
                                            "backslash",
                                  optarg);
            ae = optarg;
            break;
        case 'A':
            if (!sl_ae_title_valid(optarg) || nallowed == MAX_ALLOWED)
                rc = sl_cli_usage("listen", "--allow-aet '%s': 1 to 16 printable characters, "
                                            "no backslash",
                                  optarg);
            else if (!(allowed[nallowed++] = strdup(optarg)))
                rc = SL_EXIT_INTERNAL;
            break;
        case OPT_ALLOW_FILE: rc = read_allow_file(optarg, allowed, &nallowed); break;
        case 'm': model_path = optarg; break;
        case 'o': outdir = optarg; break;
        case 'l': levels_path = optarg; break;
        case 'L': log_path = optarg; break;
        case OPT_FACTS: facts_path = optarg; break;
        case OPT_INCOMPLETE:
            if (!sl_parse_double(optarg, &incomplete_s) || incomplete_s < 0 ||
                incomplete_s > 7 * 86400)
                rc = sl_cli_usage("listen", "--incomplete-after needs seconds (0 to 604800)");
            break;
        case OPT_MAXASSOC:
            if (!sl_parse_int(optarg, &maxassoc) || maxassoc < 1 || maxassoc > 256)
                rc = sl_cli_usage("listen", "--max-associations needs 1 to 256");
            break;
        case OPT_TIMEOUT:
            if (!sl_parse_int(optarg, &timeout) || timeout < 1 || timeout > 3600)
                rc = sl_cli_usage("listen", "--timeout needs 1 to 3600 seconds");
            break;
        case OPT_PDF: pdf = true; break;
        case OPT_PAPER:
            if (strcmp(optarg, "a4") != 0 && strcmp(optarg, "letter") != 0)
                rc = sl_cli_usage("listen", "--paper needs a4 or letter, not '%s'", optarg);
            paper = optarg;
            break;
        case 'h':
            fputs(help, stdout);
            goto free_allowed;
        default: rc = sl_cli_bad_option(argv, opts, shortopts); break;
        }
        if (rc != SL_EXIT_OK)
            goto free_allowed;
    }
    if (optind != argc)
        rc = sl_cli_usage("listen", "takes no file arguments");
    else if (!port || !ae)
        rc = sl_cli_usage("listen", "--port N and --ae-title TITLE are required");
    else if (nallowed == 0)
        rc = sl_cli_usage("listen", "no --allow-aet or --allow-file: a node that accepts any "
                                    "caller is never started; name the planning system's AE "
                                    "title");
    else if (!model_path)
        rc = sl_cli_usage("listen", "--model MODEL.yaml is required");
    else if (!outdir)
        rc = sl_cli_usage("listen", "--out OUTDIR is required");
    if (rc != SL_EXIT_OK)
        goto free_allowed;

    char default_levels[4096], default_log[4096], store[4096];
    if (!levels_path) {
        char copy[4096];
        snprintf(copy, sizeof copy, "%s", model_path);
        snprintf(default_levels, sizeof default_levels, "%s/action-levels.yaml", dirname(copy));
        levels_path = default_levels;
    }
    if (!log_path) {
        snprintf(default_log, sizeof default_log, "%s/screening.sqlite", outdir);
        log_path = default_log;
    }
    snprintf(store, sizeof store, "%s/received", outdir);
    /* the reports name patients: a folder made here is closed to other
     * users (owner and group only); one that exists keeps its mode */
    if ((mkdir(outdir, 0750) != 0 && errno != EEXIST) ||
        (mkdir(store, 0700) != 0 && errno != EEXIST)) {
        sl_cli_error("%s: cannot create the output folder: %s", outdir,
                strerror(errno));
        rc = SL_EXIT_INTERNAL;
        goto free_allowed;
    }

    sl_error err = {0};
    sl_model *model = NULL;
    sl_levels *levels = NULL;
    sl_facts *facts = NULL;
    sl_screenlog *log = NULL;
    sl_node *node = NULL;
    sl_scp *scp = NULL;
    if (sl_model_load(model_path, &model, &err) != SL_OK ||
        sl_levels_load(levels_path, &levels, &err) != SL_OK ||
        (facts_path && sl_facts_load(facts_path, &facts, &err) != SL_OK) ||
        sl_facts_check_kinds(facts, levels, levels_path, &err) != SL_OK ||
        sl_screenlog_open(log_path, true, &log, &err) != SL_OK) {
        rc = sl_cli_fail(&err);
        goto done;
    }
    sl_batch_config cfg = {
        .model = model,
        .levels = levels,
        .model_path = model_path,
        .levels_path = levels_path,
        .outdir = outdir,
        .facts = facts,
        .log = log,
        .command = "listen",
        .threads_per_plan = 0,
        .pdf_paper = pdf ? paper : NULL,
    };
    if (sl_node_create(&cfg, store, incomplete_s, &node, &err) != SL_OK) {
        rc = sl_cli_fail(&err);
        goto done;
    }
    /* a peer that drops the connection must not end the node with SIGPIPE */
    signal(SIGPIPE, SIG_IGN);
    struct sigaction sa;
    memset(&sa, 0, sizeof sa);
    sa.sa_handler = on_signal;
    sigemptyset(&sa.sa_mask);
    sigaction(SIGTERM, &sa, NULL);
    sigaction(SIGINT, &sa, NULL);
    sl_scp_config scfg = {
        .port = port,
        .ae_title = ae,
        .allowed = (const char *const *)allowed,
        .nallowed = nallowed,
        .store_dir = store,
        .max_associations = maxassoc,
        .timeout_s = timeout,
        .callback = on_event,
        .ctx = node,
    };
    /* what an earlier run left in the store: screened now unless the log
     * says it was screened before. Before the node listens: a plan received
     * while the store is listed would be queued twice, by the listing and
     * by its arrival, and screened twice */
    sl_node_resume_counts rc0;
    if (sl_node_resume(node, &rc0, &err) != SL_OK) {
        logline("%s", err.msg);
        rc = sl_cli_exit_code(err.code);
        goto done;
    }
    if (rc0.plans || rc0.structure_sets || rc0.unreadable)
        logline("start-up: the store holds %zu plan%s and %zu structure set%s from an earlier "
                "run: %zu plan%s already in the screening log (%s), %zu to pair and screen "
                "now, %zu without electron beams (left); %zu file%s whose header cannot be "
                "read",
                rc0.plans, rc0.plans == 1 ? "" : "s", rc0.structure_sets,
                rc0.structure_sets == 1 ? "" : "s", rc0.in_log, rc0.in_log == 1 ? "" : "s",
                log_path, rc0.queued, rc0.not_electron, rc0.unreadable,
                rc0.unreadable == 1 ? "" : "s");
    else
        logline("start-up: the store is empty, nothing from an earlier run");
    sl_batch_prepare();
    if (stop_requested) { /* a signal during the listing: never start listening */
        logline("stopped before listening");
        goto done;
    }
    if (sl_scp_start(&scfg, &scp, &err) != SL_OK) {
        rc = sl_cli_fail(&err);
        goto done;
    }
    logline("listening on port %d as AE title '%s' (%zu allowed caller%s); store %s", port, ae,
            nallowed, nallowed == 1 ? "" : "s", store);
    while (!stop_requested) {
        if (sl_scp_poll(scp, &err) != SL_OK) {
            logline("%s", err.msg);
            rc = SL_EXIT_INTERNAL;
            break;
        }
        if (sl_node_step(node, monotonic_s(), on_entry, NULL, &err) != SL_OK) {
            logline("%s", err.msg);
            rc = sl_cli_exit_code(err.code);
            break;
        }
        const char *problem = sl_node_take_problem(node);
        if (problem)
            logline("%s", problem);
        struct timespec nap = {0, 100 * 1000 * 1000};
        nanosleep(&nap, NULL);
    }
    if (stop_requested)
        logline("stopping: waiting for the current associations");
    sl_scp_stop(scp);
    scp = NULL;
    /* what arrived before the stop is still screened */
    if (rc == SL_EXIT_OK && sl_node_step(node, monotonic_s(), on_entry, NULL, &err) != SL_OK) {
        logline("%s", err.msg);
        rc = sl_cli_exit_code(err.code);
    }
    logline("stopped");
done:
    sl_scp_stop(scp);
    sl_node_free(node);
    sl_screenlog_close(log);
    sl_facts_free(facts);
    sl_levels_free(levels);
    sl_model_free(model);
free_allowed:
    for (size_t i = 0; i < nallowed; i++)
        free(allowed[i]);
    return rc;
}
