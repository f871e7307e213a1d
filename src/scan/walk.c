/*
 * The folder side of `scan`: walk an export folder, read every file's DICOM
 * header, and sort what was found into plans to screen (with their structure
 * sets), plans to skip, plans left incomplete, duplicates and bad files.
 *
 * Files are classified by their SOP Class, never by name or extension.
 * Plans pair with structure sets through the plan's Referenced Structure Set
 * Sequence (the SOP Instance UID); the frames of reference are checked again
 * by sl_pair_check() when the pair is screened. An RT Dose goes with the
 * plan its Referenced RT Plan Sequence names, when its Frame of Reference is
 * that plan's (scan.h says which are used and which refused). The walk keeps its own stack
 * of directories (no recursion, no global callback state as nftw() needs).
 * A symbolic link to a file is read as the file (an export may link its
 * objects); a link to a folder is not followed, since a loop would never
 * end: one inside the scanned folder, or to our own output, loses nothing
 * (a note), any other, and a link to nothing, is a row of its own, so that
 * the plans it may hold are not missed in silence.
 */
#include <dirent.h>
#include <errno.h>
#include <stdarg.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>

#include "strayline/parallel.h"
#include "strayline/scan.h"
#include "strayline/util.h"

typedef struct strvec {
    char **v;
    size_t n, cap;
} strvec;

static bool strvec_push(strvec *s, char *p)
{
    if (s->n == s->cap) {
        size_t cap = s->cap ? 2 * s->cap : 64;
        char **g = realloc(s->v, cap * sizeof *g);
        if (!g)
            return false;
        s->v = g;
        s->cap = cap;
    }
    s->v[s->n++] = p;
    return true;
}

static char *join(const char *a, const char *b)
{
    size_t na = strlen(a), nb = strlen(b);
    char *p = malloc(na + nb + 2);
    if (!p)
        return NULL;
    memcpy(p, a, na);
    size_t k = na;
    if (na == 0 || a[na - 1] != '/')
        p[k++] = '/';
    memcpy(p + k, b, nb + 1);
    return p;
}

static int cmp_str(const void *a, const void *b)
{
    return strcmp(*(char *const *)a, *(char *const *)b);
}

/* A path that could not be listed or read, with why: both vectors take
 * their strings (path is freed on failure). */
static bool push_bad(strvec *bad, strvec *badwhy, char *path, const char *why)
{
    char *w = strdup(why);
    if (!w || !strvec_push(badwhy, w)) {
        free(w);
        free(path);
        return false;
    }
    if (!strvec_push(bad, path)) {
        free(path);
        return false;
    }
    return true;
}

static void read_one(size_t i, void *ctx)
{
    sl_scan_file *f = &((sl_scan_files *)ctx)->files[i];
    sl_error err = {0};
    f->ok = sl_dicom_read_head(f->path, &f->head, &err) == SL_OK;
    if (!f->ok)
        f->why = strdup(err.msg[0] ? err.msg : "unreadable");
}

void sl_scan_files_free(sl_scan_files *f)
{
    if (!f)
        return;
    for (size_t i = 0; i < f->n; i++) {
        free(f->files[i].path);
        free(f->files[i].why);
    }
    free(f->files);
    sl_notes_free(&f->notes);
    free(f);
}

/* What a link to a folder is judged against. */
typedef struct walk_root {
    const char *real;           /* the scanned folder, resolved (NULL if not) */
    const struct stat *skip;    /* our output folder, or NULL */
} walk_root;

/* Whether the resolved path t is the folder root or lies inside it. */
static bool path_within(const char *t, const char *root)
{
    size_t n = strlen(root);
    if (n > 1 && root[n - 1] == '/')
        n--;
    return strncmp(t, root, n) == 0 && (t[n] == '\0' || t[n] == '/');
}

/* Whether the symbolic link p leads to a regular file, to be read as one;
 * otherwise it becomes a bad row with its reason (*st set on running out
 * of memory). */
static bool link_to_file(const char *p, const walk_root *wr, strvec *bad, strvec *badwhy,
                         sl_scan_files *f, sl_status *st)
{
    struct stat ts;
    char why[300];
    if (stat(p, &ts) != 0) {
        snprintf(why, sizeof why, "a symbolic link that leads nowhere readable: %s",
                 strerror(errno));
    } else if (S_ISREG(ts.st_mode)) {
        return true;
    } else if (S_ISDIR(ts.st_mode) && wr->skip && ts.st_dev == wr->skip->st_dev &&
               ts.st_ino == wr->skip->st_ino) {
        return false; /* to our own output: reports and the log are not inputs */
    } else if (S_ISDIR(ts.st_mode)) {
        /* a link to a folder the walk reaches anyway (latest -> a dated
         * folder beside it) loses nothing: a note, not a row that would
         * make every run need attention (found by an independent review) */
        char *t = wr->real ? realpath(p, NULL) : NULL;
        bool within = t && path_within(t, wr->real);
        free(t);
        if (within) {
            sl_notes_add(&f->notes, "%s: a symbolic link to a folder inside the scanned one, "
                                    "not followed: its files are read where they lie",
                         p);
            return false;
        }
        snprintf(why, sizeof why, "a symbolic link to a folder, not followed (a loop would "
                                  "never end): the files in it were not screened; scan the "
                                  "folder itself");
    } else {
        return false; /* to a device, socket or pipe: not a file of an export */
    }
    f->nunreadable++;
    sl_notes_add(&f->notes, "%s: %s", p, why);
    char *copy = strdup(p); /* push_bad owns it, freed there on failure */
    if (!copy || !push_bad(bad, badwhy, copy, why))
        *st = SL_ENOMEM;
    return false;
}

sl_status sl_scan_walk(const char *dir, int threads, const char *skip, sl_scan_files **out,
                       sl_error *err)
{
    *out = NULL;
    struct stat sb, skip_sb;
    bool have_skip = skip && stat(skip, &skip_sb) == 0;
    if (stat(dir, &sb) != 0)
        return sl_error_set(err, SL_EINPUT, "%s: cannot open: %s", dir, strerror(errno));
    if (!S_ISDIR(sb.st_mode))
        return sl_error_set(err, SL_EINPUT, "%s: not a folder", dir);
    sl_scan_files *f = calloc(1, sizeof *f);
    strvec todo = {0}, found = {0}, bad = {0}, badwhy = {0}; /* bad: folders not listed */
    char *root_real = realpath(dir, NULL);
    walk_root wr = {root_real, have_skip ? &skip_sb : NULL};
    sl_status st = SL_OK;
    char *root = f ? strdup(dir) : NULL;
    if (!root || !strvec_push(&todo, root)) {
        free(root);
        st = sl_error_set(err, SL_ENOMEM, "out of memory");
        goto done;
    }
    while (todo.n) {
        char *d = todo.v[--todo.n];
        DIR *dp = opendir(d);
        if (!dp) {
            /* a row of its own in the summary, so that the plans it may
             * hold are not missed in silence */
            char why[300];
            snprintf(why, sizeof why, "cannot list this folder: %s: the files in it were not "
                                      "screened", strerror(errno));
            f->nunreadable++;
            sl_notes_add(&f->notes, "%s: cannot list: %s", d, strerror(errno));
            if (!push_bad(&bad, &badwhy, d, why)) {
                st = sl_error_set(err, SL_ENOMEM, "out of memory");
                goto done;
            }
            continue;
        }
        struct dirent *de;
        while ((de = readdir(dp))) {
            if (strcmp(de->d_name, ".") == 0 || strcmp(de->d_name, "..") == 0)
                continue;
            char *p = join(d, de->d_name);
            struct stat es;
            if (!p) {
                st = sl_error_set(err, SL_ENOMEM, "out of memory");
                break;
            }
            if (lstat(p, &es) != 0) {
                char why[300];
                snprintf(why, sizeof why, "cannot read: %s", strerror(errno));
                f->nunreadable++;
                sl_notes_add(&f->notes, "%s: cannot read: %s", p, strerror(errno));
                if (!push_bad(&bad, &badwhy, p, why)) {
                    st = sl_error_set(err, SL_ENOMEM, "out of memory");
                    break;
                }
            } else if (S_ISDIR(es.st_mode)) {
                if (have_skip && es.st_dev == skip_sb.st_dev && es.st_ino == skip_sb.st_ino) {
                    free(p); /* our own output: reports and the log are not inputs */
                } else if (!strvec_push(&todo, p)) {
                    free(p);
                    st = sl_error_set(err, SL_ENOMEM, "out of memory");
                    break;
                }
            } else if (S_ISLNK(es.st_mode) && !link_to_file(p, &wr, &bad, &badwhy, f, &st)) {
                free(p); /* a row of its own, or out of memory */
                if (st != SL_OK) {
                    st = sl_error_set(err, SL_ENOMEM, "out of memory");
                    break;
                }
            } else if (S_ISREG(es.st_mode) || S_ISLNK(es.st_mode)) {
                if (!strvec_push(&found, p)) {
                    free(p);
                    st = sl_error_set(err, SL_ENOMEM, "out of memory");
                    break;
                }
            } else {
                free(p); /* devices, sockets, pipes: not files of an export */
            }
        }
        closedir(dp);
        free(d);
        if (st != SL_OK)
            goto done;
    }
    if (found.n)
        qsort(found.v, found.n, sizeof *found.v, cmp_str);
    f->files = calloc(found.n + bad.n ? found.n + bad.n : 1, sizeof *f->files);
    if (!f->files) {
        st = sl_error_set(err, SL_ENOMEM, "out of memory");
        goto done;
    }
    f->n = found.n;
    for (size_t i = 0; i < found.n; i++)
        f->files[i].path = found.v[i];
    found.n = 0;
    sl_parallel_for(f->n, sl_parallel_threads(threads), read_one, f);
    for (size_t i = 0; i < f->n; i++)
        if (!f->files[i].ok && !f->files[i].why) {
            st = sl_error_set(err, SL_ENOMEM, "out of memory");
            goto done;
        }
    /* what could not be listed or read, after the files: not readable */
    for (size_t i = 0; i < bad.n; i++) {
        f->files[f->n].path = bad.v[i];
        f->files[f->n].why = badwhy.v[i];
        f->files[f->n].ok = false;
        f->n++;
    }
    for (size_t i = bad.n; i < badwhy.n; i++)
        free(badwhy.v[i]);
    bad.n = badwhy.n = 0;
done:
    for (size_t i = 0; i < todo.n; i++)
        free(todo.v[i]);
    for (size_t i = 0; i < found.n; i++)
        free(found.v[i]);
    for (size_t i = 0; i < bad.n; i++)
        free(bad.v[i]);
    for (size_t i = 0; i < badwhy.n; i++)
        free(badwhy.v[i]);
    free(root_real);
    free(todo.v);
    free(found.v);
    free(bad.v);
    free(badwhy.v);
    if (st != SL_OK) {
        sl_scan_files_free(f);
        return st;
    }
    *out = f;
    return SL_OK;
}

const char *sl_outcome_name(sl_outcome o)
{
    switch (o) {
    case SL_OUT_SCREENED: return "screened";
    case SL_OUT_ERROR: return "error";
    case SL_OUT_INCOMPLETE: return "incomplete";
    case SL_OUT_SKIPPED: return "skipped";
    case SL_OUT_DUPLICATE: return "duplicate";
    case SL_OUT_IGNORED: return "ignored";
    case SL_OUT_BAD: return "bad";
    }
    return "?";
}

void sl_batch_entry_clear(sl_batch_entry *e)
{
    char **s[] = {&e->plan_path,  &e->ss_path,      &e->patient_id, &e->plan_label,
                  &e->plan_uid,   &e->ss_uid,       &e->worst_status, &e->message,
                  &e->report_json, &e->report_html, &e->report_pdf, &e->unjudged};
    for (size_t i = 0; i < sizeof s / sizeof *s; i++)
        free(*s[i]);
    for (size_t i = 0; i < e->ntps; i++)
        free(e->tps_paths[i]);
    free(e->tps_paths);
    free(e->tps_note);
    for (size_t i = 0; i < e->nflagged; i++) {
        free(e->organs[i].roi);
        free(e->organs[i].kind);
        free(e->organs[i].status);
        free(e->organs[i].level);
    }
    free(e->organs);
    memset(e, 0, sizeof *e);
}

/* Index of UIDs: an open-addressing hash over the files, so pairing 10,000
 * files stays linear. */
typedef struct uid_index {
    size_t cap;
    size_t *slot; /* file index + 1; 0 empty */
} uid_index;

static uint64_t hash_str(const char *s)
{
    uint64_t h = 1469598103934665603ull; /* FNV-1a */
    for (; *s; s++)
        h = (h ^ (unsigned char)*s) * 1099511628211ull;
    return h;
}

/* The first file with this SOP Instance UID, or SIZE_MAX; inserts i when
 * absent (i SIZE_MAX: look up only). */
static size_t uid_find_or_add(uid_index *x, const sl_scan_file *files, const char *uid, size_t i)
{
    size_t k = (size_t)(hash_str(uid) & (x->cap - 1));
    while (x->slot[k]) {
        const sl_scan_file *g = &files[x->slot[k] - 1];
        if (strcmp(g->head.sop_instance_uid, uid) == 0)
            return x->slot[k] - 1;
        k = (k + 1) & (x->cap - 1);
    }
    if (i != SIZE_MAX)
        x->slot[k] = i + 1;
    return SIZE_MAX;
}

static char *dup_or_null(const char *s, bool *ok)
{
    if (!s || !*s)
        return NULL;
    char *c = strdup(s);
    if (!c)
        *ok = false;
    return c;
}

static char *fmt_msg(bool *ok, const char *fmt, const char *a, const char *b)
{
    size_t n = strlen(fmt) + strlen(a) + (b ? strlen(b) : 0) + 1;
    char *m = malloc(n);
    if (!m) {
        *ok = false;
        return NULL;
    }
    snprintf(m, n, fmt, a, b ? b : "");
    return m;
}

/* A note appended to *note ("; " between notes). */
static void note_add(char **note, bool *ok, const char *fmt, ...)
#if defined(__GNUC__)
    __attribute__((format(printf, 3, 4)))
#endif
    ;
static void note_add(char **note, bool *ok, const char *fmt, ...)
{
    sl_buf b = {0};
    if (*note)
        sl_buf_printf(&b, "%s; ", *note);
    va_list ap;
    va_start(ap, fmt);
    char one[1024];
    vsnprintf(one, sizeof one, fmt, ap);
    va_end(ap);
    sl_buf_printf(&b, "%s", one);
    if (b.failed || !b.data) {
        *ok = false;
        sl_buf_free(&b);
        return;
    }
    free(*note);
    *note = b.data; /* the buffer's text, now owned by the note */
}

/* The RT Doses that name plan file p (a list through next_dose): which to
 * combine with it, and a note on each one refused. */
static void choose_doses(const sl_scan_files *f, size_t p, const size_t *first_dose,
                         const size_t *next_dose, sl_batch_entry *o, bool *ok)
{
    const sl_dicom_head *ph = &f->files[p].head;
    size_t nplan = 0, nbeam = 0, plan_dose = SIZE_MAX;
    for (size_t j = first_dose[p]; j != SIZE_MAX; j = next_dose[j]) {
        const sl_dicom_head *h = &f->files[j].head;
        const char *path = f->files[j].path;
        if (!h->frame_uid[0] || strcmp(h->frame_uid, ph->frame_uid) != 0) {
            note_add(&o->tps_note, ok,
                     "RT Dose %s refused for this plan: its Frame of Reference UID (0020,0052) "
                     "'%s' is not the plan's '%s' (another patient frame: its grid would not lie "
                     "on this patient)",
                     path, h->frame_uid, ph->frame_uid);
            continue;
        }
        if (strcmp(h->summation, "PLAN") == 0) {
            nplan++;
            plan_dose = j;
        } else if (strcmp(h->summation, "BEAM") == 0) {
            nbeam++;
        } else {
            note_add(&o->tps_note, ok,
                     "RT Dose %s refused for this plan: Dose Summation Type (3004,000A) '%s' "
                     "(only PLAN or BEAM doses are combined)",
                     path, h->summation);
        }
    }
    if (nplan > 1) {
        note_add(&o->tps_note, ok,
                 "%zu RT Doses of summation PLAN name this plan: which one holds its dose is "
                 "not clear, none is used (give one with estimate --tps-dose)",
                 nplan);
        return;
    }
    size_t want = nplan == 1 ? 1 : nbeam;
    if (want == 0)
        return;
    o->tps_paths = calloc(want, sizeof *o->tps_paths);
    if (!o->tps_paths) {
        *ok = false;
        return;
    }
    for (size_t j = first_dose[p]; j != SIZE_MAX; j = next_dose[j]) {
        const sl_dicom_head *h = &f->files[j].head;
        if (!h->frame_uid[0] || strcmp(h->frame_uid, ph->frame_uid) != 0)
            continue;
        if (nplan == 1 && j != plan_dose) {
            if (strcmp(h->summation, "BEAM") == 0)
                note_add(&o->tps_note, ok,
                         "RT Dose %s (BEAM) not used: the plan's PLAN dose %s holds every beam",
                         f->files[j].path, f->files[plan_dose].path);
            continue;
        }
        if (nplan == 0 && strcmp(h->summation, "BEAM") != 0)
            continue;
        char *c = strdup(f->files[j].path);
        if (!c) {
            *ok = false;
            return;
        }
        o->tps_paths[o->ntps++] = c;
    }
}

/* Whether two files hold the same bytes: two copies of one export do, and
 * then the data sets need not be compared element by element. An object
 * edited and saved again under its old SOP Instance UID differs in both,
 * and then the folder does not say which one is meant. A file that cannot
 * be read counts as different. */
static bool same_bytes(const char *a, const char *b)
{
    FILE *fa = fopen(a, "rb"), *fb = fopen(b, "rb");
    bool same = fa && fb;
    char ba[65536], bb[65536];
    while (same) {
        size_t na = fread(ba, 1, sizeof ba, fa), nb = fread(bb, 1, sizeof bb, fb);
        same = na == nb && memcmp(ba, bb, na) == 0 && !ferror(fa) && !ferror(fb);
        if (na < sizeof ba)
            break;
    }
    if (fa)
        fclose(fa);
    if (fb)
        fclose(fb);
    return same;
}

sl_status sl_scan_pair(const sl_scan_files *f, sl_batch_entry **entries, size_t *n,
                       sl_error *err)
{
    *entries = NULL;
    *n = 0;
    uid_index x = {0};
    x.cap = 16;
    while (x.cap < 2 * f->n + 2)
        x.cap *= 2;
    x.slot = calloc(x.cap, sizeof *x.slot);
    const size_t nf = f->n ? f->n : 1; /* no allocation of size 0 */
    sl_batch_entry *e = calloc(nf, sizeof *e);
    bool *dup = calloc(nf, sizeof *dup);
    if (!x.slot || !e || !dup) {
        free(x.slot);
        free(e);
        free(dup);
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    }
    /* conflict: a UID that two files of different content share; neither
     * is screened, nor a plan that names such a structure set */
    bool *conflict = calloc(nf, sizeof *conflict);
    if (!conflict) {
        free(x.slot);
        free(e);
        free(dup);
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    }
    for (size_t i = 0; i < f->n; i++) {
        if (!f->files[i].ok)
            continue;
        size_t first = uid_find_or_add(&x, f->files, f->files[i].head.sop_instance_uid, i);
        if (first == SIZE_MAX)
            continue;
        dup[i] = true;
        if (!same_bytes(f->files[first].path, f->files[i].path) &&
            !sl_dicom_same_data_set(f->files[first].path, f->files[i].path))
            conflict[i] = conflict[first] = true;
    }
    /* each plan's RT Doses, as lists through the files */
    size_t *first_dose = malloc(nf * sizeof *first_dose);
    size_t *next_dose = malloc(nf * sizeof *next_dose);
    bool *dose_taken = calloc(nf, sizeof *dose_taken);
    if (!first_dose || !next_dose || !dose_taken) {
        free(first_dose);
        free(next_dose);
        free(dose_taken);
        free(x.slot);
        free(e);
        free(dup);
        free(conflict);
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    }
    for (size_t i = 0; i < f->n; i++)
        first_dose[i] = next_dose[i] = SIZE_MAX;
    for (size_t i = f->n; i-- > 0;) { /* backwards, so each list keeps the files' order */
        const sl_scan_file *g = &f->files[i];
        if (!g->ok || dup[i] || g->head.kind != SL_HEAD_RTDOSE || !g->head.plan_ref_uid[0])
            continue;
        size_t p = uid_find_or_add(&x, f->files, g->head.plan_ref_uid, SIZE_MAX);
        if (p == SIZE_MAX || f->files[p].head.kind != SL_HEAD_RTPLAN)
            continue;
        next_dose[i] = first_dose[p];
        first_dose[p] = i;
        dose_taken[i] = true;
    }
    size_t k = 0;
    bool ok = true;
    for (size_t i = 0; i < f->n && ok; i++) {
        const sl_scan_file *g = &f->files[i];
        const sl_dicom_head *h = &g->head;
        sl_batch_entry *o = &e[k];
        if (!g->ok) {
            o->outcome = SL_OUT_BAD;
            o->plan_path = dup_or_null(g->path, &ok);
            o->message = dup_or_null(g->why, &ok);
            k++;
            continue;
        }
        if ((h->kind == SL_HEAD_RTSTRUCT || dose_taken[i]) && !dup[i])
            continue; /* listed with the plan that uses it */
        o->plan_path = dup_or_null(g->path, &ok);
        o->patient_id = dup_or_null(h->patient_id, &ok);
        o->plan_label = dup_or_null(h->label, &ok);
        o->plan_uid = dup_or_null(h->sop_instance_uid, &ok);
        k++;
        if (dup[i] && conflict[i] &&
            (h->kind == SL_HEAD_RTPLAN || h->kind == SL_HEAD_RTSTRUCT)) {
            size_t first = uid_find_or_add(&x, f->files, h->sop_instance_uid, SIZE_MAX);
            o->outcome = SL_OUT_ERROR;
            o->message = fmt_msg(&ok, "the SOP Instance UID of %s with other content: an edited "
                                      "object needs a new UID; neither is screened%s",
                                 f->files[first].path, NULL);
            continue;
        }
        if (dup[i]) {
            size_t first = uid_find_or_add(&x, f->files, h->sop_instance_uid, SIZE_MAX);
            o->outcome = SL_OUT_DUPLICATE;
            o->message = fmt_msg(&ok, "the same object (SOP Instance UID) as %s: screened once%s",
                                 f->files[first].path, NULL);
            continue;
        }
        if (conflict[i] && h->kind == SL_HEAD_RTPLAN) {
            o->outcome = SL_OUT_ERROR;
            o->message = fmt_msg(&ok, "another file in the folder has this plan's SOP Instance "
                                      "UID with other content: an edited plan needs a new UID; "
                                      "neither is screened%s%s",
                                 "", NULL);
            continue;
        }
        if (h->kind == SL_HEAD_RTDOSE) {
            o->outcome = SL_OUT_IGNORED;
            o->message = h->plan_ref_uid[0]
                             ? fmt_msg(&ok, "an RT Dose of the plan with SOP Instance UID %s, "
                                            "which is not in the folder%s",
                                       h->plan_ref_uid, NULL)
                             : fmt_msg(&ok, "an RT Dose that names no plan (Referenced RT Plan "
                                            "Sequence (300C,0002))%s%s",
                                       "", NULL);
            continue;
        }
        if (h->kind == SL_HEAD_OTHER) {
            o->outcome = SL_OUT_IGNORED;
            o->message = fmt_msg(&ok, "a DICOM object of another kind (SOP Class %s), not an RT "
                                      "Plan or an RT Structure Set%s",
                                 h->sop_class_uid, NULL);
            continue;
        }
        o->ss_uid = dup_or_null(h->structure_set_uid, &ok);
        if (h->electron_beams == 0) {
            o->outcome = SL_OUT_SKIPPED;
            o->message = fmt_msg(&ok, "no electron beams (%s beam%s): only electron plans are "
                                      "screened",
                                 h->nbeams == 0 ? "no" : h->nbeams == 1 ? "one other" : "other",
                                 h->nbeams == 1 ? "" : "s");
            continue;
        }
        size_t s = h->structure_set_uid[0]
                       ? uid_find_or_add(&x, f->files, h->structure_set_uid, SIZE_MAX)
                       : SIZE_MAX;
        if (s == SIZE_MAX || f->files[s].head.kind != SL_HEAD_RTSTRUCT) {
            o->outcome = SL_OUT_INCOMPLETE;
            o->message =
                h->structure_set_uid[0]
                    ? fmt_msg(&ok, "its structure set (SOP Instance UID %s) is not in the "
                                   "folder%s",
                              h->structure_set_uid, NULL)
                    : fmt_msg(&ok, "the plan names no structure set (ReferencedStructureSetSequence "
                                   "(300C,0060))%s%s",
                              "", NULL);
            continue;
        }
        if (conflict[s]) {
            o->outcome = SL_OUT_ERROR;
            o->message = fmt_msg(&ok, "its structure set's SOP Instance UID %s is held by files "
                                      "of different content in the folder: an edited structure "
                                      "set needs a new UID; not screened%s",
                                 h->structure_set_uid, NULL);
            continue;
        }
        o->outcome = SL_OUT_SCREENED; /* to screen */
        o->ss_path = dup_or_null(f->files[s].path, &ok);
        choose_doses(f, i, first_dose, next_dose, o, &ok);
    }
    free(x.slot);
    free(dup);
    free(conflict);
    free(first_dose);
    free(next_dose);
    free(dose_taken);
    if (!ok) {
        for (size_t i = 0; i < f->n; i++)
            sl_batch_entry_clear(&e[i]);
        free(e);
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    }
    *entries = e;
    *n = k;
    return SL_OK;
}
