/*
 * `strayline scan DIR --model MODEL.yaml --out OUTDIR`: screen every
 * electron plan of an export folder. Files are sorted by their DICOM
 * headers, plans paired with their structure sets, the pairs screened on a
 * pool of threads (one plan a thread: plans are independent, and a plan on
 * one thread keeps memory flat), each plan's reports written, every
 * screening logged, and a summary written. A progress bar on a terminal,
 * plain lines otherwise; exit 4 when a plan is flagged or an electron plan
 * could not be screened.
 */
#include <errno.h>
#include <getopt.h>
#include <libgen.h>
#include <pthread.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>

#include "cli.h"
#include "strayline/machine.h"
#include "strayline/parallel.h"
#include "strayline/scan.h"
#include "strayline/util.h"

static const char help[] =
    "usage: strayline scan DIR --model MODEL.yaml --out OUTDIR [OPTIONS]\n\n"
    "Screen every electron plan found in DIR (searched recursively; files are\n"
    "recognised by their DICOM headers, not their names). Each RT Plan is\n"
    "paired with the RT Structure Set it references; each pair is screened as\n"
    "'estimate' does, and its JSON and HTML reports are written to OUTDIR with\n"
    "summary.csv, summary.json and index.html (attention first). Plans without\n"
    "electron beams are skipped, plans whose structure set is missing are\n"
    "incomplete, unreadable files are listed with the reason. Every screening\n"
    "is recorded in the screening log (SQLite). Exit code 4 when a plan is\n"
    "flagged or an electron plan could not be screened.\n\n"
    "  -m, --model FILE      the machine's model file (required)\n"
    "  -o, --out DIR         output folder (required; created if absent)\n"
    "  -l, --levels FILE     action-level table (default: action-levels.yaml\n"
    "                        beside the model file)\n"
    "  -L, --log FILE        screening log (default: OUTDIR/screening.sqlite)\n"
    "      --facts FILE      per-patient facts (YAML, keyed by patient ID or plan\n"
    "                        UID): gestational age, pacing dependence, organ kinds,\n"
    "                        doses from elsewhere, age, sex\n"
    "      --pdf             also the printable PDF report of each plan (plans are\n"
    "                        then screened one at a time)\n"
    "      --paper SIZE      a4 (default) or letter, for --pdf\n"
    "      --rescreen-stale  screen only the plans whose latest screening in the\n"
    "                        log used another version of this machine's model\n"
    "  -j, --threads N       plans screened at once (default: one more than the cores)\n"
    "  -q, --quiet           no progress output\n"
    "  -h, --help            this help\n";

enum { OPT_FACTS = 256, OPT_STALE, OPT_PDF, OPT_PAPER };

typedef struct pool_ctx {
    const sl_batch_config *cfg;
    sl_batch_entry *entries;
    size_t *todo;
    size_t ntodo;
    pthread_mutex_t lock;
    size_t done;
    bool tty, quiet;
    sl_status fatal;
    sl_error fatal_err;
} pool_ctx;

static void progress(pool_ctx *p, const sl_batch_entry *e)
{
    if (p->quiet)
        return;
    if (p->tty) {
        int width = 40, filled = (int)(width * p->done / (p->ntodo ? p->ntodo : 1));
        fprintf(stderr, "\r[");
        for (int i = 0; i < width; i++)
            fputc(i < filled ? '#' : '.', stderr);
        fprintf(stderr, "] %zu/%zu plans", p->done, p->ntodo);
        if (p->done == p->ntodo)
            fputc('\n', stderr);
    } else {
        char a[80], b[80];
        fprintf(stderr, "strayline scan: %zu/%zu %s %s: %s%s%s\n", p->done, p->ntodo,
                sl_text_escape(e->patient_id ? e->patient_id : "-", a, sizeof a),
                sl_text_escape(e->plan_label ? e->plan_label : "-", b, sizeof b),
                sl_outcome_name(e->outcome), e->flagged ? ", flagged" : "",
                e->tps_used            ? ", with the planning system's RT Dose"
                : e->tps_note          ? ", its RT Dose refused (see the summary)"
                                       : "");
    }
    fflush(stderr);
}

static void screen_task(size_t i, void *ctx)
{
    pool_ctx *p = ctx;
    sl_batch_entry *e = &p->entries[p->todo[i]];
    sl_error err = {0};
    sl_status st = sl_batch_screen(p->cfg, e, &err);
    pthread_mutex_lock(&p->lock);
    if (st != SL_OK && p->fatal == SL_OK) {
        p->fatal = st;
        p->fatal_err = err;
    }
    p->done++;
    progress(p, e);
    pthread_mutex_unlock(&p->lock);
}

/* The plan's latest row in h (for this machine's model when machine is
 * given), or NULL. */
static const sl_history_row *in_history(const sl_history *h, const char *uid,
                                        const char *machine)
{
    const sl_history_row *last = NULL;
    for (size_t i = 0; uid && i < h->n; i++)
        if (h->rows[i].plan_uid && strcmp(h->rows[i].plan_uid, uid) == 0 &&
            (!machine ||
             (h->rows[i].model_machine && strcmp(h->rows[i].model_machine, machine) == 0)))
            last = &h->rows[i]; /* oldest first */
    return last;
}

/* The folder's walk, on a thread of its own (sl_cmd_scan). */
typedef struct walk_job {
    const char *dir;
    int threads;
    const char *skip;
    sl_scan_files *files;
    sl_error err;
    sl_status st;
} walk_job;

static void *walk_thread(void *arg)
{
    walk_job *j = arg;
    j->st = sl_scan_walk(j->dir, j->threads, j->skip, &j->files, &j->err);
    return NULL;
}

int sl_cmd_scan(int argc, char **argv)
{
    static const struct option opts[] = {
        {"model", required_argument, NULL, 'm'},
        {"out", required_argument, NULL, 'o'},
        {"levels", required_argument, NULL, 'l'},
        {"log", required_argument, NULL, 'L'},
        {"facts", required_argument, NULL, OPT_FACTS},
        {"rescreen-stale", no_argument, NULL, OPT_STALE},
        {"pdf", no_argument, NULL, OPT_PDF},
        {"paper", required_argument, NULL, OPT_PAPER},
        {"threads", required_argument, NULL, 'j'},
        {"quiet", no_argument, NULL, 'q'},
        {"help", no_argument, NULL, 'h'},
        {NULL, 0, NULL, 0},
    };
    const char *model_path = NULL, *outdir = NULL, *levels_path = NULL, *log_path = NULL,
               *facts_path = NULL;
    bool rescreen = false, quiet = false, pdf = false;
    const char *paper = "a4";
    int threads = 0, c;
    optind = 1;
    static const char shortopts[] = "m:o:l:L:j:qh";
    while ((c = getopt_long(argc, argv, shortopts, opts, NULL)) != -1) {
        switch (c) {
        case 'm': model_path = optarg; break;
        case 'o': outdir = optarg; break;
        case 'l': levels_path = optarg; break;
        case 'L': log_path = optarg; break;
        case OPT_FACTS: facts_path = optarg; break;
        case OPT_STALE: rescreen = true; break;
        case OPT_PDF: pdf = true; break;
        case OPT_PAPER:
            if (strcmp(optarg, "a4") != 0 && strcmp(optarg, "letter") != 0)
                return sl_cli_usage("scan", "--paper needs a4 or letter, not '%s'", optarg);
            paper = optarg;
            break;
        case 'j':
            if (!sl_parse_int(optarg, &threads) || threads < 1 || threads > 64)
                return sl_cli_usage("scan", "--threads needs a number from 1 to 64");
            break;
        case 'q': quiet = true; break;
        case 'h': fputs(help, stdout); return SL_EXIT_OK;
        default: return sl_cli_bad_option(argv, opts, shortopts);
        }
    }
    if (argc - optind != 1)
        return sl_cli_usage("scan", "needs one folder: DIR");
    if (!model_path)
        return sl_cli_usage("scan", "--model MODEL.yaml is required");
    if (!outdir)
        return sl_cli_usage("scan", "--out OUTDIR is required");
    const char *dir = argv[optind];
    char default_levels[4096], default_log[4096];
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
    /* the reports name patients: a folder made here is closed to other
     * users (owner and group only); one that exists keeps its mode */
    if (mkdir(outdir, 0750) != 0 && errno != EEXIST) {
        sl_cli_error("%s: cannot create the output folder: %s", outdir,
                strerror(errno));
        return SL_EXIT_INTERNAL;
    }
    struct stat sb;
    if (stat(outdir, &sb) != 0 || !S_ISDIR(sb.st_mode))
        return sl_cli_usage("scan", "--out %s: not a folder", outdir);

    sl_error err = {0};
    sl_model *model = NULL;
    sl_levels *levels = NULL;
    sl_facts *facts = NULL;
    sl_screenlog *log = NULL;
    sl_scan_files *files = NULL;
    sl_batch_entry *entries = NULL;
    sl_history *stale = NULL, *known = NULL;
    size_t n = 0, *todo = NULL;
    const char **unmatched = NULL; /* facts keys that name no plan */
    int rc = SL_EXIT_OK;
    /* the folder is walked while the model and the rest load: the model
     * file took a core on its own for a twentieth of a 100-plan scan. The
     * log is opened first, so that the walk sees it as it did when it was
     * opened before the walk (a log inside the folder is one of its files);
     * its error, if any, still comes after the loads' errors. Where one of
     * those files cannot be read, nothing starts early: the error comes at
     * once rather than after the walk of a large folder. */
    walk_job wj = {dir, threads, outdir, NULL, {0}, SL_OK};
    pthread_t walker;
    bool walking = false, log_tried = false, log_ok = false;
    sl_error log_err = {0};
    if (access(model_path, R_OK) == 0 && access(levels_path, R_OK) == 0 &&
        (!facts_path || access(facts_path, R_OK) == 0)) {
        log_tried = true;
        log_ok = sl_screenlog_open(log_path, true, &log, &log_err) == SL_OK;
        walking = log_ok && pthread_create(&walker, NULL, walk_thread, &wj) == 0;
    }
    bool loaded = sl_model_load(model_path, &model, &err) == SL_OK &&
                  sl_levels_load(levels_path, &levels, &err) == SL_OK &&
                  (!facts_path || sl_facts_load(facts_path, &facts, &err) == SL_OK) &&
                  sl_facts_check_kinds(facts, levels, levels_path, &err) == SL_OK;
    if (loaded && !log_tried)
        loaded = sl_screenlog_open(log_path, true, &log, &err) == SL_OK;
    else if (loaded && !log_ok) {
        err = log_err;
        loaded = false;
    }
    if (walking)
        pthread_join(walker, NULL);
    else if (loaded)
        walk_thread(&wj);
    files = wj.files;
    if (loaded && wj.st != SL_OK) {
        err = wj.err;
        loaded = false;
    }
    if (!loaded || sl_scan_pair(files, &entries, &n, &err) != SL_OK) {
        rc = sl_cli_fail(&err);
        goto done;
    }
    sl_cli_warnings(&files->notes);
    /* a facts entry that names no plan of the folder (a typo in a patient
     * ID) would leave its patient's plan judged without its facts: said,
     * and the batch needs attention (found by an independent review: a
     * pacing dependence so lost passed a device at a lower band) */
    size_t facts_unmatched = 0;
    unmatched = facts && facts->n ? calloc(facts->n, sizeof *unmatched) : NULL;
    if (facts && facts->n && !unmatched) {
        sl_cli_error("out of memory");
        rc = SL_EXIT_INTERNAL;
        goto done;
    }
    for (size_t k = 0; facts && k < facts->n; k++) {
        const char *key = facts->items[k].key;
        bool hit = false;
        for (size_t i = 0; i < n && !hit; i++)
            hit = (entries[i].plan_uid && strcmp(entries[i].plan_uid, key) == 0) ||
                  (entries[i].patient_id && strcmp(entries[i].patient_id, key) == 0);
        if (!hit) {
            unmatched[facts_unmatched++] = key;
            sl_cli_error("warning: %s: entry '%s' names no plan UID or patient ID of the plans in %s: "
                           "its facts were used for no plan (check the key)",
                           facts->source, key, dir);
        }
    }
    if (rescreen) {
        sl_history_query q = {.stale_machine = model->machine.name,
                              .stale_sha256 = model->sha256};
        sl_history_query all = {0};
        if (sl_screenlog_query(log, &q, &stale, &err) != SL_OK ||
            sl_screenlog_query(log, &all, &known, &err) != SL_OK) {
            rc = sl_cli_fail(&err);
            goto done;
        }
    }
    todo = calloc(n ? n : 1, sizeof *todo);
    if (!todo) {
        sl_cli_error("out of memory");
        rc = SL_EXIT_INTERNAL;
        goto done;
    }
    size_t ntodo = 0;
    for (size_t i = 0; i < n; i++) {
        if (entries[i].outcome != SL_OUT_SCREENED)
            continue;
        /* stale, or never screened with this machine's model: screened;
         * the others keep what their last screening found (found by an
         * independent review: a plan whose lens exceeded its level read
         * "skipped, not flagged", exit 0) */
        const sl_history_row *last =
            stale && !in_history(stale, entries[i].plan_uid, NULL)
                ? in_history(known, entries[i].plan_uid, model->machine.name)
                : NULL;
        if (last) {
            if (sl_batch_carry_last(&entries[i], last, &err) != SL_OK) {
                rc = sl_cli_fail(&err);
                goto done;
            }
            continue;
        }
        todo[ntodo++] = i;
    }
    sl_batch_config cfg = {
        .model = model,
        .levels = levels,
        .model_path = model_path,
        .levels_path = levels_path,
        .outdir = outdir,
        .facts = facts,
        .facts_unmatched = unmatched,
        .nfacts_unmatched = facts_unmatched,
        .log = log,
        .command = "scan",
        .threads_per_plan = 1,
        .pdf_paper = pdf ? paper : NULL,
    };
    pool_ctx p = {.cfg = &cfg, .entries = entries, .todo = todo, .ntodo = ntodo,
                  .tty = isatty(STDERR_FILENO) == 1, .quiet = quiet};
    pthread_mutex_init(&p.lock, NULL);
    if (!quiet)
        fprintf(stderr, "strayline scan: %zu files, %zu plan%s to screen\n", files->n, ntodo,
                ntodo == 1 ? "" : "s");
    sl_batch_prepare();
    /* PDFs are typeset on this thread alone (see sl_batch_config.pdf_paper).
     * Otherwise one plan more at once than there are cores: each plan's two
     * reports are flushed to disk before they are renamed into place (4 ms
     * a file here), and a worker waiting for that leaves its core to the
     * spare one (measured: 100 plans 4.08 -> 3.94 s, 51 -> 65 MB) */
    int workers = threads > 0 ? threads : sl_parallel_threads(0) + 1;
    sl_parallel_for(ntodo, pdf ? 1 : workers, screen_task, &p);
    pthread_mutex_destroy(&p.lock);
    if (p.fatal != SL_OK) {
        rc = sl_cli_fail(&p.fatal_err);
        goto done;
    }
    sl_batch_sort(entries, n);
    if (sl_batch_write_summary(&cfg, entries, n, &err) != SL_OK) {
        rc = sl_cli_fail(&err);
        goto done;
    }
    size_t counts[SL_OUT_BAD + 1] = {0}, flagged = 0, tps_used = 0, tps_refused = 0;
    bool attention = false;
    for (size_t i = 0; i < n; i++) {
        counts[entries[i].outcome]++;
        tps_used += entries[i].outcome == SL_OUT_SCREENED && entries[i].tps_used;
        tps_refused += entries[i].tps_note && !entries[i].tps_used;
        flagged += entries[i].outcome == SL_OUT_SCREENED && entries[i].flagged;
        attention |= entries[i].flagged || entries[i].outcome == SL_OUT_INCOMPLETE ||
                     entries[i].outcome == SL_OUT_ERROR;
    }
    printf("screened %zu (flagged %zu), errors %zu, incomplete %zu, skipped %zu, duplicates "
           "%zu, other objects %zu, unreadable files %zu\n",
           counts[SL_OUT_SCREENED], flagged, counts[SL_OUT_ERROR], counts[SL_OUT_INCOMPLETE],
           counts[SL_OUT_SKIPPED], counts[SL_OUT_DUPLICATE], counts[SL_OUT_IGNORED],
           counts[SL_OUT_BAD]);
    if (tps_used || tps_refused)
        printf("planning system's RT Dose: used for %zu plan%s, refused for %zu (the summary's "
               "planning_system_dose says why)\n",
               tps_used, tps_used == 1 ? "" : "s", tps_refused);
    printf("summary: %s/index.html, %s/summary.csv, %s/summary.json\nlog: %s\n", outdir, outdir,
           outdir, log_path);
    if (fflush(stdout) != 0) {
        sl_cli_error("output error: cannot write to standard output");
        rc = SL_EXIT_INTERNAL;
        goto done;
    }
    if (facts_unmatched)
        printf("facts: %zu entr%s of %s named no plan of the folder (see the warnings)\n",
               facts_unmatched, facts_unmatched == 1 ? "y" : "ies", facts->source);
    if (files->nunreadable)
        printf("%zu folder%s or entr%s could not be listed or read: plans there were not "
               "screened (see the summary)\n",
               files->nunreadable, files->nunreadable == 1 ? "" : "s",
               files->nunreadable == 1 ? "y" : "ies");
    rc = attention || facts_unmatched || files->nunreadable ? SL_EXIT_FLAGGED : SL_EXIT_OK;
done:
    for (size_t i = 0; i < n; i++)
        sl_batch_entry_clear(&entries[i]);
    free(entries);
    free(todo);
    free(unmatched);
    sl_history_free(stale);
    sl_history_free(known);
    sl_scan_files_free(files);
    sl_screenlog_close(log);
    sl_facts_free(facts);
    sl_levels_free(levels);
    sl_model_free(model);
    return rc;
}
