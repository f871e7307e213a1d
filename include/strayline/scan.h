/*
 * strayline: screening where the plans are. A folder is walked and sorted
 * into plans and structure sets by their DICOM headers (never by file names),
 * plans are paired with their structure sets, each pair is screened, its
 * reports written and its screening logged; `listen` screens the pairs it
 * receives through the same sl_batch_screen().
 *
 * Nothing here prints: progress goes to a callback the command line gives.
 */
#ifndef STRAYLINE_SCAN_H
#define STRAYLINE_SCAN_H

#include <stdbool.h>
#include <stddef.h>

#include "strayline/dicomhead.h"
#include "strayline/error.h"
#include "strayline/levels.h"
#include "strayline/machine.h"
#include "strayline/model.h"
#include "strayline/screenlog.h"

#ifdef __cplusplus
extern "C" {
#endif

/* ------------------------------------------------------ the folder -- */

typedef struct sl_scan_file {
    char *path;
    bool ok;              /* the header was read */
    char *why;            /* why not (one line), when !ok */
    sl_dicom_head head;
} sl_scan_file;

typedef struct sl_scan_files {
    size_t n;
    sl_scan_file *files;  /* sorted by path */
    size_t nunreadable;   /* directories or entries that could not be listed */
    sl_notes notes;       /* ... and why */
} sl_scan_files;

/* Walk dir recursively (symbolic links are not followed, so a link cannot
 * lead the walk in a circle or out of the folder) and read the header of
 * every regular file on `threads` threads. A folder that is `skip` (the
 * output folder, when it lies inside dir; may be NULL) is not entered. */
sl_status sl_scan_walk(const char *dir, int threads, const char *skip, sl_scan_files **out,
                       sl_error *err);
void sl_scan_files_free(sl_scan_files *f);

/* What became of one object of the folder (or one received pair). */
typedef enum sl_outcome {
    SL_OUT_SCREENED,    /* screened; see flagged */
    SL_OUT_ERROR,       /* an electron plan that could not be screened: why */
    SL_OUT_INCOMPLETE,  /* an electron plan whose structure set is missing */
    SL_OUT_SKIPPED,     /* a plan without electron beams */
    SL_OUT_DUPLICATE,   /* the same object (SOP Instance UID) found before */
    SL_OUT_IGNORED,     /* a DICOM object of another kind (an image, ...) */
    SL_OUT_BAD          /* not readable as DICOM: why */
} sl_outcome;

const char *sl_outcome_name(sl_outcome o);

/* A flagged organ, for the summary and the log. */
typedef struct sl_flagged_organ {
    char *roi, *kind, *status, *level;
    double course_cgy, upper_cgy, level_gy; /* NAN when none */
} sl_flagged_organ;

typedef struct sl_batch_entry {
    sl_outcome outcome;
    char *plan_path, *ss_path;   /* ss_path NULL when none */
    char *patient_id, *plan_label, *plan_uid, *ss_uid; /* may be NULL */
    size_t nbeams;               /* electron treatment beams screened */
    bool flagged;
    int rank;                    /* sort key: higher needs attention sooner */
    char *worst_status;          /* text, NULL when not screened */
    char *message;               /* why not screened, or what to supply */
    char *unjudged;              /* organs with levels not judged ("ROI, ROI"), or NULL */
    char *report_json, *report_html, *report_pdf; /* names inside the output folder, or NULL */
    size_t nflagged;
    sl_flagged_organ *organs;
    long long log_id;            /* row id in the log, 0 when not logged */
    size_t ntps;
    char **tps_paths;            /* RT Doses of the folder to combine with this plan (scan) */
    char *tps_note;              /* what became of the RT Doses that name this plan: used, or
                                    refused and why ("; " between them); NULL when none */
    bool tps_used;               /* screened with the planning system's dose */
} sl_batch_entry;

void sl_batch_entry_clear(sl_batch_entry *e);

/* Sort the folder's files into entries: one per plan (to screen, skipped,
 * incomplete), per bad or foreign file, per duplicate. Entries whose
 * outcome is SL_OUT_SCREENED are still to be screened (sl_batch_screen);
 * the rest are final.
 *
 * An RT Dose whose Referenced RT Plan is a plan of the folder goes with that
 * plan (as `estimate --tps-dose` takes it) when its Frame of Reference is
 * the plan's: one PLAN dose, else every BEAM dose. One of another frame, a
 * second PLAN dose, a BEAM dose beside a PLAN dose or another summation
 * type is refused for that plan, and tps_note says which and why; an RT
 * Dose of a plan not in the folder is listed as ignored. */
sl_status sl_scan_pair(const sl_scan_files *f, sl_batch_entry **entries, size_t *n,
                       sl_error *err);

/* ------------------------------------------------- patient facts -- */

/* Facts a batch cannot read from the plan, given per patient ID or plan UID
 * in a YAML file (README.md). */
typedef struct sl_facts_entry {
    char *key;                   /* patient ID or plan UID */
    double gestational_weeks;    /* NAN */
    double conception_weeks;     /* NAN */
    bool pacing_dependent;
    bool pacing_stated;          /* pacing_dependent given (true or false) */
    double age_years;            /* NAN */
    char sex;                    /* 0, 'M', 'F' */
    size_t nmap;
    sl_organ_map *map;           /* ROI -> kind; strings owned */
    size_t nother;
    sl_other_dose *other;        /* strings owned */
} sl_facts_entry;

typedef struct sl_facts {
    char *source;
    size_t n;
    sl_facts_entry *items;
} sl_facts;

sl_status sl_facts_load(const char *path, sl_facts **out, sl_error *err);
void sl_facts_free(sl_facts *f);
/* Every organ kind the facts name is a kind of the action-level table;
 * else an input error naming the facts file, the entry and the kind (found
 * by an independent review: a misspelt kind failed each plan later as if
 * given by --organ). */
sl_status sl_facts_check_kinds(const sl_facts *f, const sl_levels *levels,
                               const char *levels_path, sl_error *err);
/* The facts for a plan: by plan UID first, then by patient ID; NULL. */
const sl_facts_entry *sl_facts_find(const sl_facts *f, const char *plan_uid,
                                    const char *patient_id);

/* The facts for a plan when both an entry of its plan UID and one of its
 * patient ID may hold some: one view of the two, the plan's entry winning
 * fact by fact (its weeks, age, sex; its organ kinds and doses from
 * elsewhere for the ROIs it names, the patient's for the others; pacing
 * dependence when either says so), so that a fact given for the patient is
 * not lost when another is given for one plan. *found is false when neither
 * entry exists. The view's key names the entries ("UID + ID"); its arrays
 * are its own, their strings the facts' (sl_facts_view_free). */
sl_status sl_facts_view(const sl_facts *f, const char *plan_uid, const char *patient_id,
                        sl_facts_entry *out, bool *found, sl_error *err);
void sl_facts_view_free(sl_facts_entry *v);

/* --------------------------------------------------- screening -- */

typedef struct sl_batch_config {
    const sl_model *model;
    const sl_levels *levels;
    const char *model_path, *levels_path;
    const char *outdir;
    const sl_facts *facts;       /* may be NULL */
    /* keys of facts entries that name no plan of the batch (scan): listed
     * in the summary, since their patients' plans went without them */
    const char *const *facts_unmatched;
    size_t nfacts_unmatched;
    sl_screenlog *log;           /* may be NULL: nothing logged */
    const char *command;         /* "scan" or "listen", for the log */
    int threads_per_plan;        /* threads inside one screening (1 in a pool) */
    const char *pdf_paper;       /* "a4" or "letter": also the PDF report; NULL: none.
                                    Typeset on one thread only: Pango keeps a font map per
                                    thread, and a pool thread's leaves fontconfig data
                                    unreleased when it ends (LeakSanitizer shows it) */
} sl_batch_config;

/* Call once, on one thread, before screening on several: libxml2 (the
 * HTML writers) must be initialised before threads use it. */
void sl_batch_prepare(void);

/* Screen one pair (with the planning system's doses of tps_paths, each
 * read and checked against the plan first: any that does not belong to it,
 * BEAM doses that do not hold each screened beam once, or a plan of more
 * than one fraction group, and none is used, tps_note saying why): read both files, screen, write OUTDIR/NAME.json and
 * NAME.html (NAME from the sanitised patient ID, plan label and plan UID),
 * (and NAME.pdf with pdf_paper), log it, and fill e (outcome SL_OUT_SCREENED or SL_OUT_ERROR with the
 * reason). Returns a status only for a failure that concerns every plan
 * (the log cannot be written, memory); input errors go into e. */
sl_status sl_batch_screen(const sl_batch_config *cfg, sl_batch_entry *e, sl_error *err);

/* A plan not screened again (scan --rescreen-stale: its last screening
 * used this model) keeps what that screening found: its outcome in the
 * message, its flag, worst status, organs and reports, so that the
 * summary and the exit code do not read a flagged plan as clear. e is
 * made SL_OUT_SKIPPED. */
sl_status sl_batch_carry_last(sl_batch_entry *e, const sl_history_row *last, sl_error *err);

/* A name made of [A-Za-z0-9._-] only, from any text, at most max-1 bytes. */
void sl_sanitise_name(const char *in, char *out, size_t max);

/* Sort entries: attention first (rank), then patient ID, label, path. */
void sl_batch_sort(sl_batch_entry *e, size_t n);

/* OUTDIR/summary.csv, summary.json and index.html, written atomically. */
sl_status sl_batch_write_summary(const sl_batch_config *cfg, const sl_batch_entry *e, size_t n,
                                 sl_error *err);

/* ---------------------------------------------- a receiving node -- */

/* The pairing side of `listen`: objects arrive one by one, in any order and
 * over several associations; a plan is screened once its structure set is
 * in the store folder, and reported incomplete once it has waited longer
 * than a limit (it is still screened if the structure set comes later). */
typedef struct sl_node sl_node;

sl_status sl_node_create(const sl_batch_config *cfg, const char *store_dir,
                         double incomplete_after_s, sl_node **out, sl_error *err);
/* An object was stored at path (thread-safe: called from the DICOM node's
 * threads; the work is done in sl_node_step). */
sl_status sl_node_received(sl_node *n, const char *path);
/* On one thread: pair what arrived, screen the complete pairs, report plans
 * waiting longer than the limit; report() gets each entry that is final or
 * newly incomplete; the summary is rewritten when anything changed. now_s
 * is a monotonic clock in seconds. */
sl_status sl_node_step(sl_node *n, double now_s,
                       void (*report)(const sl_batch_entry *e, void *ctx), void *ctx,
                       sl_error *err);
/* What the last step could not do and went on without (the summary not
 * written: a full disk), once, for the node's log; NULL when nothing. The
 * text stays valid until the next call on this thread. */
const char *sl_node_take_problem(sl_node *n);
void sl_node_free(sl_node *n);

/* At start-up, what an earlier run left in the store folder: every plan
 * there (a file "<SOP Instance UID>.dcm") of which the screening log holds
 * no screening (cfg->log; without a log, every plan) is queued as if it had
 * just arrived, so sl_node_step pairs it with a structure set in the store
 * and screens it, or waits for one. Plans already in the log are left (they
 * were screened, or refused with a reason, before). Counts say what was
 * found, for the node's log. Files the node did not name (temporaries of
 * an interrupted transfer, anything else) are not read. */
typedef struct sl_node_resume_counts {
    size_t plans;            /* RT Plans in the store */
    size_t in_log;           /* of those, screened before (in the screening log) */
    size_t queued;           /* of those, queued to pair and screen now */
    size_t not_electron;     /* of those, without electron beams: left */
    size_t structure_sets;   /* RT Structure Sets in the store */
    size_t unreadable;       /* store files whose header could not be read */
} sl_node_resume_counts;
sl_status sl_node_resume(sl_node *n, sl_node_resume_counts *c, sl_error *err);

#ifdef __cplusplus
}
#endif

#endif
