/*
 * Commissioning: fit every profile of a measurement set and build the model
 * (see include/strayline/commission.h). Profiles are independent, so they
 * are fitted in parallel; the model keeps the measurement set's order.
 */
#include "strayline/commission.h"
#include "strayline/parallel.h"
#include "strayline/version.h"

#include <math.h>
#include <pthread.h>
#include <stdatomic.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

void sl_profile_label(double energy_mev, const char *applicator, const char *insert,
                      double depth_cm, const char *direction, char *buf, size_t size)
{
    snprintf(buf, size, "%g MeV %s %s %g cm %s", energy_mev, applicator, insert, depth_cm,
             direction);
}

void sl_profile_label_geometry(double tilt_deg, double ssd_cm, double nominal_ssd_cm, char *buf,
                               size_t size)
{
    size_t len = strlen(buf);
    if (tilt_deg != 0 && len < size)
        len += (size_t)snprintf(buf + len, size - len, " tilt %+g deg", tilt_deg);
    if (fabs(ssd_cm - nominal_ssd_cm) > 1e-9 && len < size)
        snprintf(buf + len, size - len, " SSD %g cm", ssd_cm);
}

typedef struct job {
    const sl_measurement_set *ms;
    sl_model *m;
    sl_status *status;
    sl_error *errors;
    const sl_commission_options *opt;
    atomic_size_t done;
    pthread_mutex_t lock;
} job;

static void fit_task(size_t i, void *ctx)
{
    job *j = ctx;
    const sl_profile_data *d = &j->ms->profiles[i];
    char what[256];
    char label[160];
    sl_profile_label(d->energy_mev, d->applicator, d->insert, d->depth_cm, d->direction, label,
                     sizeof label);
    sl_profile_label_geometry(d->tilt_deg, d->ssd_cm, j->ms->machine.nominal_ssd_cm, label,
                              sizeof label);
    /* the entry's number in the set (a mirrored twin shares its entry's) */
    snprintf(what, sizeof what, "%s: profile %zu (%s, %s)", j->ms->source,
             d->entry ? d->entry : i + 1, label, d->file);
    j->status[i] = sl_profile_fit_data(d->distance_cm, d->dose_percent, d->sigma_percent, d->n,
                                       what, &j->m->profiles[i].fit, &j->errors[i]);
    size_t done = atomic_fetch_add(&j->done, 1) + 1;
    if (j->opt->progress) {
        pthread_mutex_lock(&j->lock);
        j->opt->progress(done, j->ms->nprofiles, label, j->opt->progress_ctx);
        pthread_mutex_unlock(&j->lock);
    }
}

static char *copy_str(const char *s, bool *ok)
{
    if (!s)
        return NULL;
    char *d = strdup(s);
    if (!d)
        *ok = false;
    return d;
}

/* A deep copy of the machine description. */
static bool copy_machine(const sl_machine *a, sl_machine *b)
{
    bool ok = true;
    memset(b, 0, sizeof *b);
    b->name = copy_str(a->name, &ok);
    b->description = copy_str(a->description, &ok);
    b->nominal_ssd_cm = a->nominal_ssd_cm;
    b->sad_cm = a->sad_cm;
    b->invented = a->invented;
    b->transfer = a->transfer;
    b->transfer.source = copy_str(a->transfer.source, &ok);
    b->transfer.mark = copy_str(a->transfer.mark, &ok);
    b->transfer.bands = malloc((a->transfer.nbands ? a->transfer.nbands : 1) *
                               sizeof *b->transfer.bands);
    if (!b->transfer.bands)
        return false;
    if (a->transfer.nbands)
        memcpy(b->transfer.bands, a->transfer.bands, a->transfer.nbands * sizeof *a->transfer.bands);
    b->applicators = calloc(a->napplicators ? a->napplicators : 1, sizeof *b->applicators);
    b->inserts = calloc(a->ninserts ? a->ninserts : 1, sizeof *b->inserts);
    b->outputs = calloc(a->noutputs ? a->noutputs : 1, sizeof *b->outputs);
    if (!b->applicators || !b->inserts || !b->outputs)
        return false;
    for (size_t i = 0; i < a->napplicators; i++) {
        b->applicators[i] = a->applicators[i];
        b->applicators[i].id = copy_str(a->applicators[i].id, &ok);
        b->applicators[i].shape = copy_str(a->applicators[i].shape, &ok);
        b->napplicators = i + 1;
    }
    for (size_t i = 0; i < a->ninserts; i++) {
        b->inserts[i] = a->inserts[i];
        b->inserts[i].id = copy_str(a->inserts[i].id, &ok);
        b->inserts[i].applicator = copy_str(a->inserts[i].applicator, &ok);
        b->inserts[i].shape = copy_str(a->inserts[i].shape, &ok);
        b->ninserts = i + 1;
    }
    for (size_t i = 0; i < a->noutputs; i++) {
        const sl_output_spec *o = &a->outputs[i];
        sl_output_spec *p = &b->outputs[i];
        *p = *o;
        p->applicator = copy_str(o->applicator, &ok);
        p->factors = NULL;
        p->nfactors = 0;
        b->noutputs = i + 1;
        if (o->nfactors) {
            p->factors = calloc(o->nfactors, sizeof *p->factors);
            if (!p->factors)
                return false;
            for (size_t k = 0; k < o->nfactors; k++) {
                p->factors[k].factor = o->factors[k].factor;
                p->factors[k].insert = copy_str(o->factors[k].insert, &ok);
                p->nfactors = k + 1;
            }
        }
    }
    return ok;
}

sl_status sl_commission(const sl_measurement_set *ms, const sl_commission_options *opt,
                        sl_model **out, sl_error *err)
{
    *out = NULL;
    if (!opt || !opt->model_version || !opt->created)
        return sl_error_set(err, SL_EUSAGE, "commissioning needs a model version and a time");
    sl_model *m = calloc(1, sizeof *m);
    if (!m)
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    bool ok = copy_machine(&ms->machine, &m->machine);
    m->model_version = copy_str(opt->model_version, &ok);
    m->format_version = SL_MODEL_FORMAT_VERSION;
    m->notice = copy_str(opt->notice, &ok);
    char tool[64];
    snprintf(tool, sizeof tool, "strayline %s", sl_version());
    sl_provenance *p = &m->provenance;
    p->measurement_set = copy_str(ms->source, &ok);
    p->measurement_set_sha256 = copy_str(ms->sha256, &ok);
    p->tool = copy_str(tool, &ok);
    p->created = copy_str(opt->created, &ok);
    p->measured_date = copy_str(ms->date, &ok);
    p->measured_by = copy_str(ms->measured_by, &ok);
    p->detector = copy_str(ms->detector, &ok);
    p->reference = copy_str(ms->reference, &ok);
    m->profiles = calloc(ms->nprofiles ? ms->nprofiles : 1, sizeof *m->profiles);
    if (!ok || !m->profiles) {
        sl_model_free(m);
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    }
    for (size_t i = 0; i < ms->nprofiles; i++) {
        const sl_profile_data *d = &ms->profiles[i];
        sl_model_profile *q = &m->profiles[i];
        m->nprofiles = i + 1;
        q->energy_mev = d->energy_mev;
        q->applicator = copy_str(d->applicator, &ok);
        q->insert = copy_str(d->insert, &ok);
        q->depth_cm = d->depth_cm;
        q->direction = copy_str(d->direction, &ok);
        q->tilt_deg = d->tilt_deg;
        q->ssd_cm = d->ssd_cm;
        q->data_file = copy_str(d->file, &ok);
        memcpy(q->sha256, d->sha256, sizeof q->sha256);
        q->rel_uncertainty = d->rel_uncertainty;
        q->floor_percent = d->floor_percent;
        q->from_positions = d->from_positions;
        q->width_found_cm = d->width_found_cm;
        q->width_nominal_cm = d->width_nominal_cm;
        q->n = d->n;
        q->distance_cm = malloc(d->n * sizeof *q->distance_cm);
        q->dose_percent = malloc(d->n * sizeof *q->dose_percent);
        if (!ok || !q->distance_cm || !q->dose_percent) {
            sl_model_free(m);
            return sl_error_set(err, SL_ENOMEM, "out of memory");
        }
        memcpy(q->distance_cm, d->distance_cm, d->n * sizeof *q->distance_cm);
        memcpy(q->dose_percent, d->dose_percent, d->n * sizeof *q->dose_percent);
    }
    job j = {ms, m, calloc(ms->nprofiles ? ms->nprofiles : 1, sizeof(sl_status)),
             calloc(ms->nprofiles ? ms->nprofiles : 1, sizeof(sl_error)), opt, 0,
             PTHREAD_MUTEX_INITIALIZER};
    atomic_init(&j.done, 0);
    if (!j.status || !j.errors) {
        free(j.status);
        free(j.errors);
        sl_model_free(m);
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    }
    sl_parallel_for(ms->nprofiles, sl_parallel_threads(opt->threads), fit_task, &j);
    sl_status st = SL_OK;
    for (size_t i = 0; i < ms->nprofiles && st == SL_OK; i++) {
        if (j.status[i] != SL_OK) {
            st = j.status[i];
            if (err)
                *err = j.errors[i];
        }
    }
    free(j.status);
    free(j.errors);
    pthread_mutex_destroy(&j.lock);
    if (st != SL_OK) {
        sl_model_free(m);
        return st;
    }
    *out = m;
    return SL_OK;
}
