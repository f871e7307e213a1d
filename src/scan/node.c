/*
 * The pairing side of `listen` (scan.h, "a receiving node"). The DICOM
 * node's threads only queue the paths of stored objects; one thread (the
 * command's main loop) reads their headers, keeps the plans that wait for a
 * structure set, screens each complete pair with sl_batch_screen() exactly
 * as `scan` does, and rewrites the summary. Keeping the pairing on one
 * thread keeps its state free of locks; only the queue is shared.
 *
 * The store folder names every object by its SOP Instance UID, so "has the
 * structure set arrived" is whether "<UID>.dcm" exists there: that also
 * covers a structure set that arrived in an earlier run of the node. At
 * start-up sl_node_resume queues the plans an earlier run left there that
 * the screening log has no screening of, so nothing received is forgotten
 * when the node was stopped before it could pair or screen it.
 */
#include <dirent.h>
#include <errno.h>
#include <math.h>
#include <stdint.h>
#include <stdio.h>
#include <pthread.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>

#include "strayline/scan.h"
#include "strayline/screenlog.h"

typedef struct pending {
    char *path;
    sl_dicom_head head;
    double since_s;
    bool reported;
    size_t done_index; /* its incomplete entry in done, SIZE_MAX: none */
} pending;

struct sl_node {
    const sl_batch_config *cfg;
    char *store;
    double limit_s;
    pthread_mutex_t lock;
    char **queue;
    size_t nqueue, capqueue;
    pending *wait;
    size_t nwait, capwait;
    sl_batch_entry *done;
    size_t ndone, capdone;
    /* the summary could not be written (a full disk): tried again at each
     * step, the node going on (found by an independent review: it stopped) */
    bool summary_due;
    double summary_tried_s;         /* when it was last tried (monotonic s) */
    char problem[SL_ERROR_MSG_MAX]; /* to be logged once; "" when none */
};

sl_status sl_node_create(const sl_batch_config *cfg, const char *store_dir,
                         double incomplete_after_s, sl_node **out, sl_error *err)
{
    sl_node *n = calloc(1, sizeof *n);
    if (!n || !(n->store = strdup(store_dir))) {
        free(n);
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    }
    n->cfg = cfg;
    n->limit_s = incomplete_after_s;
    pthread_mutex_init(&n->lock, NULL);
    *out = n;
    return SL_OK;
}

const char *sl_node_take_problem(sl_node *n)
{
    static _Thread_local char taken[SL_ERROR_MSG_MAX];
    if (!n->problem[0])
        return NULL;
    snprintf(taken, sizeof taken, "%s", n->problem);
    n->problem[0] = '\0';
    return taken;
}

void sl_node_free(sl_node *n)
{
    if (!n)
        return;
    for (size_t i = 0; i < n->nqueue; i++)
        free(n->queue[i]);
    free(n->queue);
    for (size_t i = 0; i < n->nwait; i++)
        free(n->wait[i].path);
    free(n->wait);
    for (size_t i = 0; i < n->ndone; i++)
        sl_batch_entry_clear(&n->done[i]);
    free(n->done);
    pthread_mutex_destroy(&n->lock);
    free(n->store);
    free(n);
}

sl_status sl_node_received(sl_node *n, const char *path)
{
    char *p = strdup(path);
    if (!p)
        return SL_ENOMEM;
    pthread_mutex_lock(&n->lock);
    if (n->nqueue == n->capqueue) {
        size_t cap = n->capqueue ? 2 * n->capqueue : 32;
        char **g = realloc(n->queue, cap * sizeof *g);
        if (!g) {
            pthread_mutex_unlock(&n->lock);
            free(p);
            return SL_ENOMEM;
        }
        n->queue = g;
        n->capqueue = cap;
    }
    n->queue[n->nqueue++] = p;
    pthread_mutex_unlock(&n->lock);
    return SL_OK;
}

static int cmp_str(const void *a, const void *b)
{
    return strcmp(*(char *const *)a, *(char *const *)b);
}

/* The plan UIDs the screening log holds, sorted (caller frees the array;
 * the strings belong to *h). */
static sl_status logged_plans(sl_screenlog *log, sl_history **h, char ***uids, size_t *n,
                              sl_error *err)
{
    *uids = NULL;
    *n = 0;
    sl_history_query q = {0};
    sl_status st = sl_screenlog_query(log, &q, h, err);
    if (st != SL_OK)
        return st;
    *uids = malloc(((*h)->n ? (*h)->n : 1) * sizeof **uids);
    if (!*uids)
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    for (size_t i = 0; i < (*h)->n; i++)
        if ((*h)->rows[i].plan_uid)
            (*uids)[(*n)++] = (*h)->rows[i].plan_uid;
    qsort(*uids, *n, sizeof **uids, cmp_str);
    return SL_OK;
}

sl_status sl_node_resume(sl_node *n, sl_node_resume_counts *c, sl_error *err)
{
    memset(c, 0, sizeof *c);
    sl_history *h = NULL;
    char **uids = NULL;
    size_t nuids = 0;
    sl_status st = n->cfg->log ? logged_plans(n->cfg->log, &h, &uids, &nuids, err) : SL_OK;
    DIR *dir = st == SL_OK ? opendir(n->store) : NULL;
    if (st == SL_OK && !dir)
        st = sl_error_set(err, SL_EIO, "%s: cannot list the store folder: %s", n->store,
                          strerror(errno));
    struct dirent *de;
    while (st == SL_OK && (de = readdir(dir)) != NULL) {
        /* only the node's own names: "<valid UID>.dcm" */
        size_t len = strlen(de->d_name);
        char stem[SL_HEAD_UID];
        if (len < 5 || len - 4 >= sizeof stem || strcmp(de->d_name + len - 4, ".dcm") != 0)
            continue;
        memcpy(stem, de->d_name, len - 4);
        stem[len - 4] = '\0';
        if (!sl_dicom_uid_valid(stem))
            continue;
        size_t plen = strlen(n->store) + len + 2;
        char *path = malloc(plen);
        if (!path) {
            st = sl_error_set(err, SL_ENOMEM, "out of memory");
            break;
        }
        snprintf(path, plen, "%s/%s", n->store, de->d_name);
        struct stat sb;
        sl_dicom_head head;
        sl_error herr = {0};
        if (lstat(path, &sb) != 0 || !S_ISREG(sb.st_mode) ||
            sl_dicom_read_head(path, &head, &herr) != SL_OK) {
            c->unreadable++;
            free(path);
            continue;
        }
        if (head.kind == SL_HEAD_RTSTRUCT)
            c->structure_sets++;
        if (head.kind != SL_HEAD_RTPLAN) {
            free(path);
            continue;
        }
        c->plans++;
        const char *key = head.sop_instance_uid;
        if (nuids && bsearch(&key, uids, nuids, sizeof *uids, cmp_str)) {
            c->in_log++;
            free(path);
            continue;
        }
        if (head.electron_beams == 0) {
            c->not_electron++;
            free(path);
            continue;
        }
        if (sl_node_received(n, path) != SL_OK)
            st = sl_error_set(err, SL_ENOMEM, "out of memory");
        else
            c->queued++;
        free(path);
    }
    if (dir)
        closedir(dir);
    free(uids);
    sl_history_free(h);
    return st;
}

/* A new final entry (kept for the summary); NULL when out of memory. */
static sl_batch_entry *new_entry(sl_node *n)
{
    if (n->ndone == n->capdone) {
        size_t cap = n->capdone ? 2 * n->capdone : 32;
        sl_batch_entry *g = realloc(n->done, cap * sizeof *g);
        if (!g)
            return NULL;
        n->done = g;
        n->capdone = cap;
    }
    sl_batch_entry *e = &n->done[n->ndone++];
    memset(e, 0, sizeof *e);
    return e;
}

static char *dup0(const char *s, bool *ok)
{
    if (!s || !*s)
        return NULL;
    char *c = strdup(s);
    if (!c)
        *ok = false;
    return c;
}

static sl_status fill_from_head(sl_batch_entry *e, const char *path, const sl_dicom_head *h)
{
    bool ok = true;
    e->plan_path = dup0(path, &ok);
    e->patient_id = dup0(h->patient_id, &ok);
    e->plan_label = dup0(h->label, &ok);
    e->plan_uid = dup0(h->sop_instance_uid, &ok);
    e->ss_uid = dup0(h->structure_set_uid, &ok);
    return ok ? SL_OK : SL_ENOMEM;
}

/* Take the queue, read each header; plans join the waiting list. */
static sl_status take_queue(sl_node *n, double now_s,
                            void (*report)(const sl_batch_entry *, void *), void *ctx,
                            bool *changed, sl_error *err)
{
    pthread_mutex_lock(&n->lock);
    char **q = n->queue;
    size_t nq = n->nqueue;
    n->queue = NULL;
    n->nqueue = n->capqueue = 0;
    pthread_mutex_unlock(&n->lock);
    sl_status st = SL_OK;
    for (size_t i = 0; i < nq; i++) {
        sl_dicom_head h;
        sl_error herr = {0};
        if (st != SL_OK) {
            free(q[i]);
            continue;
        }
        if (sl_dicom_read_head(q[i], &h, &herr) != SL_OK || h.kind != SL_HEAD_RTPLAN) {
            if (herr.msg[0]) {
                sl_batch_entry *e = new_entry(n);
                if (!e) {
                    st = sl_error_set(err, SL_ENOMEM, "out of memory");
                } else {
                    e->outcome = SL_OUT_BAD;
                    bool ok = true;
                    e->plan_path = dup0(q[i], &ok);
                    e->message = dup0(herr.msg, &ok);
                    report(e, ctx);
                    *changed = true;
                }
            }
            free(q[i]); /* structure sets wait in the store for their plans */
            continue;
        }
        if (h.electron_beams == 0) {
            sl_batch_entry *e = new_entry(n);
            if (!e || fill_from_head(e, q[i], &h) != SL_OK ||
                !(e->message = strdup("no electron beams: only electron plans are screened"))) {
                st = sl_error_set(err, SL_ENOMEM, "out of memory");
            } else {
                e->outcome = SL_OUT_SKIPPED;
                report(e, ctx);
                *changed = true;
            }
            free(q[i]);
            continue;
        }
        if (n->nwait == n->capwait) {
            size_t cap = n->capwait ? 2 * n->capwait : 16;
            pending *g = realloc(n->wait, cap * sizeof *g);
            if (!g) {
                st = sl_error_set(err, SL_ENOMEM, "out of memory");
                free(q[i]);
                continue;
            }
            n->wait = g;
            n->capwait = cap;
        }
        n->wait[n->nwait++] = (pending){q[i], h, now_s, false, SIZE_MAX};
    }
    free(q);
    return st;
}

sl_status sl_node_step(sl_node *n, double now_s,
                       void (*report)(const sl_batch_entry *e, void *ctx), void *ctx,
                       sl_error *err)
{
    bool changed = false;
    sl_status st = take_queue(n, now_s, report, ctx, &changed, err);
    for (size_t i = 0; st == SL_OK && i < n->nwait;) {
        pending *p = &n->wait[i];
        char *ss = NULL;
        if (p->head.structure_set_uid[0] && sl_dicom_uid_valid(p->head.structure_set_uid)) {
            size_t len = strlen(n->store) + strlen(p->head.structure_set_uid) + 6;
            ss = malloc(len);
            if (!ss)
                return sl_error_set(err, SL_ENOMEM, "out of memory");
            snprintf(ss, len, "%s/%s.dcm", n->store, p->head.structure_set_uid);
            if (access(ss, R_OK) != 0) {
                free(ss);
                ss = NULL;
            }
        }
        if (!ss) {
            if (!p->reported && now_s - p->since_s >= n->limit_s) {
                /* reported, listed, and kept waiting: the structure set may still come */
                p->reported = true;
                sl_batch_entry *e = new_entry(n);
                if (!e || fill_from_head(e, p->path, &p->head) != SL_OK)
                    return sl_error_set(err, SL_ENOMEM, "out of memory");
                p->done_index = n->ndone - 1;
                e->outcome = SL_OUT_INCOMPLETE;
                e->flagged = true;
                char msg[256];
                snprintf(msg, sizeof msg,
                         "its structure set (SOP Instance UID %s) has not arrived after %g s",
                         p->head.structure_set_uid[0] ? p->head.structure_set_uid : "none given",
                         n->limit_s);
                e->message = strdup(msg);
                report(e, ctx);
                changed = true;
            }
            i++;
            continue;
        }
        sl_batch_entry *e;
        if (p->done_index != SIZE_MAX) {
            e = &n->done[p->done_index]; /* incomplete no more */
            sl_batch_entry_clear(e);
        } else {
            e = new_entry(n);
        }
        if (!e || fill_from_head(e, p->path, &p->head) != SL_OK) {
            free(ss);
            return sl_error_set(err, SL_ENOMEM, "out of memory");
        }
        e->ss_path = ss;
        st = sl_batch_screen(n->cfg, e, err);
        report(e, ctx);
        changed = true;
        free(p->path);
        n->wait[i] = n->wait[--n->nwait];
    }
    if (st == SL_OK && (changed || (n->summary_due && now_s - n->summary_tried_s >= 1))) {
        n->summary_tried_s = now_s;
        /* the summary lists this run's plans, attention first; sorting a
         * copy keeps the order of arrival in n->done */
        sl_batch_entry *copy = malloc((n->ndone ? n->ndone : 1) * sizeof *copy);
        if (!copy)
            return sl_error_set(err, SL_ENOMEM, "out of memory");
        memcpy(copy, n->done, n->ndone * sizeof *copy);
        sl_batch_sort(copy, n->ndone);
        sl_error werr = {0};
        sl_status ws = sl_batch_write_summary(n->cfg, copy, n->ndone, &werr);
        free(copy);
        if (ws == SL_ENOMEM)
            return sl_error_set(err, SL_ENOMEM, "%s", werr.msg);
        if (ws != SL_OK && !n->summary_due)
            snprintf(n->problem, sizeof n->problem,
                     "%s: the summary is tried again at the next change or second", werr.msg);
        else if (ws == SL_OK && n->summary_due)
            snprintf(n->problem, sizeof n->problem, "the summary is written again");
        n->summary_due = ws != SL_OK;
    }
    return st;
}
