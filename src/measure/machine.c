/*
 * The machine description (see include/strayline/machine.h): reading it from
 * a measurement set or model file, writing it back, and lookups.
 */
#include "strayline/machine.h"
#include "strayline/util.h"

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

static bool one_of(const char *s, const char *const *words)
{
    for (; *words; words++) {
        if (strcmp(s, *words) == 0)
            return true;
    }
    return false;
}

void sl_machine_free(sl_machine *m)
{
    if (!m)
        return;
    free(m->name);
    free(m->description);
    for (size_t i = 0; i < m->napplicators; i++) {
        free(m->applicators[i].id);
        free(m->applicators[i].shape);
    }
    free(m->applicators);
    for (size_t i = 0; i < m->ninserts; i++) {
        free(m->inserts[i].id);
        free(m->inserts[i].applicator);
        free(m->inserts[i].shape);
    }
    free(m->inserts);
    free(m->transfer.bands);
    free(m->transfer.source);
    free(m->transfer.mark);
    for (size_t i = 0; i < m->noutputs; i++) {
        free(m->outputs[i].applicator);
        for (size_t k = 0; k < m->outputs[i].nfactors; k++)
            free(m->outputs[i].factors[k].insert);
        free(m->outputs[i].factors);
    }
    free(m->outputs);
    memset(m, 0, sizeof *m);
}

const sl_applicator_spec *sl_machine_applicator(const sl_machine *m, const char *id)
{
    for (size_t i = 0; id && i < m->napplicators; i++) {
        if (strcmp(m->applicators[i].id, id) == 0)
            return &m->applicators[i];
    }
    return NULL;
}

const sl_insert_spec *sl_machine_insert(const sl_machine *m, const char *applicator,
                                        const char *id)
{
    for (size_t i = 0; id && i < m->ninserts; i++) {
        if (strcmp(m->inserts[i].id, id) == 0 &&
            (!applicator || strcmp(m->inserts[i].applicator, applicator) == 0))
            return &m->inserts[i];
    }
    return NULL;
}

double sl_insert_area_cm2(const sl_insert_spec *s)
{
    return strcmp(s->shape, "circle") == 0 ? M_PI * s->x_cm * s->y_cm / 4 : s->x_cm * s->y_cm;
}

double sl_insert_equivalent_square_cm(const sl_insert_spec *s)
{
    /* 4 area / perimeter: the diameter of a circle, 2xy/(x+y) of a rectangle */
    if (strcmp(s->shape, "circle") == 0)
        return sqrt(s->x_cm * s->y_cm);
    return 2 * s->x_cm * s->y_cm / (s->x_cm + s->y_cm);
}

/* The built-in transfer uncertainty. Far from the field, out-of-field
 * estimates have been found between 0.34 and 2.93 times the dose measured
 * in vivo or in a phantom (Kry et al., Med Phys 34:1193 (2007)): a relative
 * standard uncertainty of 1.0 puts the k = 2 upper bound at 3 times the
 * estimate, which covers it. Nearer the field the profile was measured
 * closer to the patient's situation and the bands are smaller; their values
 * are a choice (common practice), to be replaced by a clinic's own in-vivo
 * comparisons. */
static const sl_transfer_band default_bands[] = {
    {5.0, 0.25}, {15.0, 0.40}, {30.0, 0.60}, {INFINITY, 1.00}};
static const char default_source[] =
    "strayline defaults: far band sized so that the k = 2 bound covers out-of-field estimates "
    "found 0.34 to 2.93 times the measured dose (Kry et al., Med Phys 34:1193 (2007)); nearer "
    "bands chosen smaller";
static const char default_mark[] = "common practice";

sl_status sl_transfer_default(sl_transfer *t, sl_error *err)
{
    size_t n = sizeof default_bands / sizeof *default_bands;
    bool ok = true;
    memset(t, 0, sizeof *t);
    t->bands = malloc(sizeof default_bands);
    t->source = sl_strdup(default_source, &ok);
    t->mark = sl_strdup(default_mark, &ok);
    if (!t->bands || !ok) {
        free(t->bands);
        free(t->source);
        free(t->mark);
        memset(t, 0, sizeof *t);
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    }
    memcpy(t->bands, default_bands, sizeof default_bands);
    t->nbands = n;
    t->is_default = true;
    return SL_OK;
}

double sl_transfer_relative(const sl_transfer *t, double d)
{
    for (size_t i = 0; i < t->nbands; i++) {
        if (d < t->bands[i].below_cm)
            return t->bands[i].relative;
    }
    return t->nbands ? t->bands[t->nbands - 1].relative : 0;
}

static sl_status read_transfer(sl_yaml *y, yaml_node_t *n, sl_transfer *t, sl_error *err)
{
    memset(t, 0, sizeof *t);
    sl_yaml_field f[] = {{"source", true, NULL}, {"mark", true, NULL}, {"bands", true, NULL}};
    sl_status st = sl_yaml_fields(y, n, "transfer_uncertainty", f, 3, err);
    if (st == SL_OK)
        st = sl_yaml_string(y, f[0].node, "transfer_uncertainty source", &t->source, err);
    if (st == SL_OK)
        st = sl_yaml_string(y, f[1].node, "transfer_uncertainty mark", &t->mark, err);
    static const char *const marks[] = {"published", "secondary", "from memory",
                                        "common practice", "measured", NULL};
    if (st == SL_OK && !one_of(t->mark, marks))
        st = sl_yaml_error(y, f[1].node, err,
                           "transfer_uncertainty: mark '%s' (published, secondary, from memory, "
                           "common practice or measured)",
                           t->mark);
    yaml_node_item_t *items;
    size_t nb = 0;
    if (st == SL_OK)
        st = sl_yaml_seq(y, f[2].node, "transfer_uncertainty bands", &items, &nb, err);
    if (st == SL_OK && nb == 0)
        st = sl_yaml_error(y, f[2].node, err, "transfer_uncertainty: bands: the list is empty");
    if (st == SL_OK && !(t->bands = calloc(nb, sizeof *t->bands)))
        st = sl_error_set(err, SL_ENOMEM, "out of memory");
    for (size_t i = 0; st == SL_OK && i < nb; i++) {
        yaml_node_t *b = sl_yaml_item(y, items[i]);
        sl_yaml_field g[] = {{"below_cm", false, NULL}, {"relative", true, NULL}};
        t->nbands = i + 1;
        st = sl_yaml_fields(y, b, "transfer_uncertainty band", g, 2, err);
        bool last = i + 1 == nb;
        if (st == SL_OK && (g[0].node != NULL) == last)
            st = sl_yaml_error(y, b, err,
                               "transfer_uncertainty band %zu: %s", i + 1,
                               last ? "the last band has no below_cm (it runs to any distance)"
                                    : "below_cm is required except in the last band");
        t->bands[i].below_cm = INFINITY;
        if (st == SL_OK && g[0].node)
            st = sl_yaml_number_in(y, g[0].node, "below_cm", 0.1, 500, &t->bands[i].below_cm,
                                   err);
        if (st == SL_OK && i && !(t->bands[i].below_cm > t->bands[i - 1].below_cm))
            st = sl_yaml_error(y, g[0].node, err,
                               "transfer_uncertainty band %zu: below_cm must increase", i + 1);
        if (st == SL_OK)
            st = sl_yaml_number_in(y, g[1].node, "relative", 0, 5, &t->bands[i].relative, err);
    }
    return st;
}

static void write_transfer(sl_yaml_writer *w, const sl_transfer *t)
{
    sl_yaml_key(w, "transfer_uncertainty");
    sl_yaml_map_begin(w, false);
    sl_yaml_kv_string(w, "source", t->source);
    sl_yaml_kv_string(w, "mark", t->mark);
    sl_yaml_key(w, "bands");
    sl_yaml_seq_begin(w, false);
    for (size_t i = 0; i < t->nbands; i++) {
        sl_yaml_map_begin(w, true);
        if (isfinite(t->bands[i].below_cm))
            sl_yaml_kv_number(w, "below_cm", t->bands[i].below_cm);
        sl_yaml_kv_number(w, "relative", t->bands[i].relative);
        sl_yaml_map_end(w);
    }
    sl_yaml_seq_end(w);
    sl_yaml_map_end(w);
}

const sl_output_spec *sl_machine_output_at(const sl_machine *m, double energy_mev,
                                           const char *applicator, double ssd_cm, double max_cm)
{
    const sl_output_spec *best = NULL;
    for (size_t i = 0; applicator && i < m->noutputs; i++) {
        const sl_output_spec *o = &m->outputs[i];
        if (fabs(o->energy_mev - energy_mev) < 0.01 && strcmp(o->applicator, applicator) == 0 &&
            fabs(o->ssd_cm - ssd_cm) <= max_cm &&
            (!best || fabs(o->ssd_cm - ssd_cm) < fabs(best->ssd_cm - ssd_cm)))
            best = o;
    }
    return best;
}

const sl_output_spec *sl_machine_output(const sl_machine *m, double energy_mev,
                                        const char *applicator)
{
    return sl_machine_output_at(m, energy_mev, applicator, m->nominal_ssd_cm, INFINITY);
}

sl_status sl_machine_catalogue(const sl_machine *m, sl_applicator_size **out, size_t *n,
                               sl_error *err)
{
    *out = calloc(m->napplicators ? m->napplicators : 1, sizeof **out);
    if (!*out)
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    for (size_t i = 0; i < m->napplicators; i++) {
        const sl_applicator_spec *a = &m->applicators[i];
        (*out)[i] = (sl_applicator_size){a->id, strcmp(a->shape, "circle") == 0, a->x_cm,
                                         a->y_cm, m->nominal_ssd_cm};
    }
    *n = m->napplicators;
    return SL_OK;
}


static sl_status read_applicator(sl_yaml *y, yaml_node_t *n, size_t k, sl_machine *m,
                                 sl_error *err)
{
    char what[64];
    snprintf(what, sizeof what, "applicator %zu", k + 1);
    sl_yaml_field f[] = {{"id", true, NULL},       {"shape", true, NULL},
                         {"field_x_cm", true, NULL}, {"field_y_cm", true, NULL},
                         {"source_to_end_cm", false, NULL}};
    sl_applicator_spec *a = &m->applicators[k];
    a->source_to_end_cm = NAN;
    sl_status st = sl_yaml_fields(y, n, what, f, 5, err);
    if (st == SL_OK)
        st = sl_yaml_string(y, f[0].node, what, &a->id, err);
    if (st == SL_OK)
        st = sl_yaml_string(y, f[1].node, what, &a->shape, err);
    static const char *const shapes[] = {"square", "rectangle", "circle", NULL};
    if (st == SL_OK && !one_of(a->shape, shapes))
        st = sl_yaml_error(y, f[1].node, err, "%s: shape '%s' (square, rectangle or circle)",
                           what, a->shape);
    if (st == SL_OK)
        st = sl_yaml_number_in(y, f[2].node, "field_x_cm", 0.5, 60, &a->x_cm, err);
    if (st == SL_OK)
        st = sl_yaml_number_in(y, f[3].node, "field_y_cm", 0.5, 60, &a->y_cm, err);
    if (st == SL_OK && f[4].node)
        st = sl_yaml_number_in(y, f[4].node, "source_to_end_cm", 10, 200, &a->source_to_end_cm,
                               err);
    if (st == SL_OK && strcmp(a->shape, "square") == 0 && a->x_cm != a->y_cm)
        st = sl_yaml_error(y, n, err, "%s: a square applicator with sides %g and %g cm", what,
                           a->x_cm, a->y_cm);
    for (size_t j = 0; st == SL_OK && j < k; j++) {
        if (strcmp(m->applicators[j].id, a->id) == 0)
            st = sl_yaml_error(y, n, err, "%s: duplicate applicator id '%s'", what, a->id);
    }
    return st;
}

static sl_status read_insert(sl_yaml *y, yaml_node_t *n, size_t k, sl_machine *m, sl_error *err)
{
    char what[64];
    snprintf(what, sizeof what, "insert %zu", k + 1);
    sl_yaml_field f[] = {{"id", true, NULL},        {"applicator", true, NULL},
                         {"shape", true, NULL},     {"size_x_cm", true, NULL},
                         {"size_y_cm", true, NULL}, {"profiles_relative_to", false, NULL}};
    sl_insert_spec *s = &m->inserts[k];
    sl_status st = sl_yaml_fields(y, n, what, f, 6, err);
    if (st == SL_OK)
        st = sl_yaml_string(y, f[0].node, what, &s->id, err);
    if (st == SL_OK && strcmp(s->id, SL_INSERT_OPEN) == 0)
        st = sl_yaml_error(y, f[0].node, err, "%s: '%s' is reserved for the open applicator",
                           what, SL_INSERT_OPEN);
    if (st == SL_OK)
        st = sl_yaml_string(y, f[1].node, what, &s->applicator, err);
    if (st == SL_OK && !sl_machine_applicator(m, s->applicator))
        st = sl_yaml_error(y, f[1].node, err, "%s: applicator '%s' is not in the list", what,
                           s->applicator);
    if (st == SL_OK)
        st = sl_yaml_string(y, f[2].node, what, &s->shape, err);
    static const char *const shapes[] = {"square", "rectangle", "circle", "irregular", NULL};
    if (st == SL_OK && !one_of(s->shape, shapes))
        st = sl_yaml_error(y, f[2].node, err,
                           "%s: shape '%s' (square, rectangle, circle or irregular)", what,
                           s->shape);
    if (st == SL_OK)
        st = sl_yaml_number_in(y, f[3].node, "size_x_cm", 0.5, 60, &s->x_cm, err);
    if (st == SL_OK)
        st = sl_yaml_number_in(y, f[4].node, "size_y_cm", 0.5, 60, &s->y_cm, err);
    s->relative_to = SL_REL_UNSTATED;
    if (st == SL_OK && f[5].node) {
        char *rel = NULL;
        st = sl_yaml_string(y, f[5].node, "profiles_relative_to", &rel, err);
        if (st == SL_OK && strcmp(rel, "insert_cax") == 0)
            s->relative_to = SL_REL_INSERT_CAX;
        else if (st == SL_OK && strcmp(rel, "open_cax") == 0)
            s->relative_to = SL_REL_OPEN_CAX;
        else if (st == SL_OK)
            st = sl_yaml_error(y, f[5].node, err,
                               "%s: profiles_relative_to '%s' (insert_cax: the insert's own "
                               "central-axis maximum; open_cax: the open applicator's)",
                               what, rel);
        free(rel);
    }
    for (size_t j = 0; st == SL_OK && j < k; j++) {
        if (strcmp(m->inserts[j].id, s->id) == 0 &&
            strcmp(m->inserts[j].applicator, s->applicator) == 0)
            st = sl_yaml_error(y, n, err, "%s: duplicate insert '%s' for applicator '%s'", what,
                               s->id, s->applicator);
    }
    return st;
}

static sl_status read_output(sl_yaml *y, yaml_node_t *n, size_t k, sl_machine *m, sl_error *err)
{
    char what[64];
    snprintf(what, sizeof what, "output %zu", k + 1);
    sl_yaml_field f[] = {{"energy_mev", true, NULL},       {"applicator", true, NULL},
                         {"dose_per_mu_cgy", true, NULL},  {"dmax_cm", true, NULL},
                         {"effective_ssd_cm", true, NULL}, {"cutout_factors", false, NULL},
                         {"ssd_cm", false, NULL}};
    sl_output_spec *o = &m->outputs[k];
    sl_status st = sl_yaml_fields(y, n, what, f, 7, err);
    if (st == SL_OK)
        st = sl_yaml_number_in(y, f[0].node, "energy_mev", 1, 50, &o->energy_mev, err);
    if (st == SL_OK)
        st = sl_yaml_string(y, f[1].node, what, &o->applicator, err);
    if (st == SL_OK && !sl_machine_applicator(m, o->applicator))
        st = sl_yaml_error(y, f[1].node, err, "%s: applicator '%s' is not in the list", what,
                           o->applicator);
    if (st == SL_OK)
        st = sl_yaml_number_in(y, f[2].node, "dose_per_mu_cgy", 0.05, 20, &o->dose_per_mu_cgy,
                               err);
    if (st == SL_OK)
        st = sl_yaml_number_in(y, f[3].node, "dmax_cm", 0, 10, &o->dmax_cm, err);
    if (st == SL_OK)
        st = sl_yaml_number_in(y, f[4].node, "effective_ssd_cm", 10, 500, &o->effective_ssd_cm,
                               err);
    o->ssd_cm = m->nominal_ssd_cm;
    if (st == SL_OK && f[6].node)
        st = sl_yaml_number_in(y, f[6].node, "ssd_cm", m->nominal_ssd_cm - 5,
                               m->nominal_ssd_cm + 30, &o->ssd_cm, err);
    for (size_t j = 0; st == SL_OK && j < k; j++) {
        if (fabs(m->outputs[j].energy_mev - o->energy_mev) < 0.01 &&
            strcmp(m->outputs[j].applicator, o->applicator) == 0 &&
            fabs(m->outputs[j].ssd_cm - o->ssd_cm) <= SL_SSD_MATCH_CM)
            st = sl_yaml_error(y, n, err,
                               "%s: duplicate output for %g MeV, applicator '%s', SSD %g cm",
                               what, o->energy_mev, o->applicator, o->ssd_cm);
    }
    if (st == SL_OK && f[5].node) {
        yaml_node_item_t *items;
        size_t nf;
        st = sl_yaml_seq(y, f[5].node, "cutout_factors", &items, &nf, err);
        if (st == SL_OK && nf) {
            o->factors = calloc(nf, sizeof *o->factors);
            if (!o->factors)
                return sl_error_set(err, SL_ENOMEM, "out of memory");
        }
        for (size_t i = 0; st == SL_OK && i < nf; i++) {
            yaml_node_t *fn = sl_yaml_item(y, items[i]);
            sl_yaml_field ff[] = {{"insert", true, NULL}, {"factor", true, NULL}};
            st = sl_yaml_fields(y, fn, "cutout factor", ff, 2, err);
            if (st == SL_OK)
                st = sl_yaml_string(y, ff[0].node, "cutout factor", &o->factors[i].insert, err);
            if (st == SL_OK)
                o->nfactors = i + 1;
            if (st == SL_OK && !sl_machine_insert(m, o->applicator, o->factors[i].insert))
                st = sl_yaml_error(y, ff[0].node, err,
                                   "cutout factor: insert '%s' is not listed for applicator '%s'",
                                   o->factors[i].insert, o->applicator);
            if (st == SL_OK)
                st = sl_yaml_number_in(y, ff[1].node, "factor", 0.2, 2, &o->factors[i].factor,
                                       err);
        }
    }
    return st;
}

typedef sl_status (*item_reader)(sl_yaml *, yaml_node_t *, size_t, sl_machine *, sl_error *);

static sl_status read_list(sl_yaml *y, yaml_node_t *n, const char *what, size_t elem,
                           void **arr, size_t *count, item_reader fn, sl_machine *m,
                           sl_error *err)
{
    yaml_node_item_t *items;
    size_t k;
    sl_status st = sl_yaml_seq(y, n, what, &items, &k, err);
    if (st != SL_OK)
        return st;
    *arr = calloc(k ? k : 1, elem);
    if (!*arr)
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    for (size_t i = 0; i < k; i++) {
        *count = i + 1;
        st = fn(y, sl_yaml_item(y, items[i]), i, m, err);
        if (st != SL_OK)
            return st;
    }
    return SL_OK;
}

sl_status sl_machine_read(sl_yaml *y, yaml_node_t *machine, yaml_node_t *applicators,
                          yaml_node_t *inserts, yaml_node_t *outputs, sl_machine *m,
                          sl_error *err)
{
    memset(m, 0, sizeof *m);
    sl_yaml_field f[] = {{"name", true, NULL},           {"description", false, NULL},
                         {"nominal_ssd_cm", true, NULL}, {"sad_cm", true, NULL},
                         {"invented", false, NULL},      {"transfer_uncertainty", false, NULL}};
    sl_status st = sl_yaml_fields(y, machine, "machine", f, 6, err);
    if (st == SL_OK)
        st = sl_yaml_string(y, f[0].node, "machine name", &m->name, err);
    if (st == SL_OK && f[1].node)
        st = sl_yaml_string(y, f[1].node, "machine description", &m->description, err);
    if (st == SL_OK)
        st = sl_yaml_number_in(y, f[2].node, "nominal_ssd_cm", 50, 200, &m->nominal_ssd_cm, err);
    if (st == SL_OK)
        st = sl_yaml_number_in(y, f[3].node, "sad_cm", 50, 200, &m->sad_cm, err);
    if (st == SL_OK && f[4].node)
        st = sl_yaml_bool(y, f[4].node, "invented", &m->invented, err);
    if (st == SL_OK)
        st = f[5].node ? read_transfer(y, f[5].node, &m->transfer, err)
                       : sl_transfer_default(&m->transfer, err);
    if (st == SL_OK)
        st = read_list(y, applicators, "applicators", sizeof *m->applicators,
                       (void **)&m->applicators, &m->napplicators, read_applicator, m, err);
    if (st == SL_OK && m->napplicators == 0)
        st = sl_yaml_error(y, applicators, err, "applicators: the list is empty");
    if (st == SL_OK && inserts)
        st = read_list(y, inserts, "inserts", sizeof *m->inserts, (void **)&m->inserts,
                       &m->ninserts, read_insert, m, err);
    if (st == SL_OK)
        st = read_list(y, outputs, "outputs", sizeof *m->outputs, (void **)&m->outputs,
                       &m->noutputs, read_output, m, err);
    for (size_t i = 0; st == SL_OK && i < m->noutputs; i++) {
        /* an output at another SSD adds to the nominal one, never replaces it */
        const sl_output_spec *o = &m->outputs[i];
        if (!sl_machine_output_at(m, o->energy_mev, o->applicator, m->nominal_ssd_cm,
                                  SL_SSD_MATCH_CM))
            st = sl_yaml_error(y, outputs, err,
                               "outputs: %g MeV, applicator '%s' has no output at the nominal "
                               "SSD of %g cm",
                               o->energy_mev, o->applicator, m->nominal_ssd_cm);
    }
    if (st != SL_OK)
        sl_machine_free(m);
    return st;
}

void sl_machine_write(sl_yaml_writer *w, const sl_machine *m)
{
    sl_yaml_key(w, "machine");
    sl_yaml_map_begin(w, false);
    sl_yaml_kv_string(w, "name", m->name);
    if (m->description)
        sl_yaml_kv_string(w, "description", m->description);
    sl_yaml_kv_number(w, "nominal_ssd_cm", m->nominal_ssd_cm);
    sl_yaml_kv_number(w, "sad_cm", m->sad_cm);
    sl_yaml_kv_bool(w, "invented", m->invented);
    write_transfer(w, &m->transfer);
    sl_yaml_map_end(w);
    sl_yaml_key(w, "applicators");
    sl_yaml_seq_begin(w, false);
    for (size_t i = 0; i < m->napplicators; i++) {
        const sl_applicator_spec *a = &m->applicators[i];
        sl_yaml_map_begin(w, true);
        sl_yaml_kv_string(w, "id", a->id);
        sl_yaml_kv_string(w, "shape", a->shape);
        sl_yaml_kv_number(w, "field_x_cm", a->x_cm);
        sl_yaml_kv_number(w, "field_y_cm", a->y_cm);
        if (isfinite(a->source_to_end_cm))
            sl_yaml_kv_number(w, "source_to_end_cm", a->source_to_end_cm);
        sl_yaml_map_end(w);
    }
    sl_yaml_seq_end(w);
    sl_yaml_key(w, "inserts");
    sl_yaml_seq_begin(w, false);
    for (size_t i = 0; i < m->ninserts; i++) {
        const sl_insert_spec *s = &m->inserts[i];
        sl_yaml_map_begin(w, true);
        sl_yaml_kv_string(w, "id", s->id);
        sl_yaml_kv_string(w, "applicator", s->applicator);
        sl_yaml_kv_string(w, "shape", s->shape);
        sl_yaml_kv_number(w, "size_x_cm", s->x_cm);
        sl_yaml_kv_number(w, "size_y_cm", s->y_cm);
        if (s->relative_to != SL_REL_UNSTATED)
            sl_yaml_kv_string(w, "profiles_relative_to",
                              s->relative_to == SL_REL_OPEN_CAX ? "open_cax" : "insert_cax");
        sl_yaml_map_end(w);
    }
    sl_yaml_seq_end(w);
    sl_yaml_key(w, "outputs");
    sl_yaml_seq_begin(w, false);
    for (size_t i = 0; i < m->noutputs; i++) {
        const sl_output_spec *o = &m->outputs[i];
        sl_yaml_map_begin(w, false);
        sl_yaml_kv_number(w, "energy_mev", o->energy_mev);
        sl_yaml_kv_string(w, "applicator", o->applicator);
        sl_yaml_kv_number(w, "dose_per_mu_cgy", o->dose_per_mu_cgy);
        sl_yaml_kv_number(w, "dmax_cm", o->dmax_cm);
        sl_yaml_kv_number(w, "effective_ssd_cm", o->effective_ssd_cm);
        if (fabs(o->ssd_cm - m->nominal_ssd_cm) > 1e-9)
            sl_yaml_kv_number(w, "ssd_cm", o->ssd_cm);
        if (o->nfactors) {
            sl_yaml_key(w, "cutout_factors");
            sl_yaml_seq_begin(w, false);
            for (size_t k = 0; k < o->nfactors; k++) {
                sl_yaml_map_begin(w, true);
                sl_yaml_kv_string(w, "insert", o->factors[k].insert);
                sl_yaml_kv_number(w, "factor", o->factors[k].factor);
                sl_yaml_map_end(w);
            }
            sl_yaml_seq_end(w);
        }
        sl_yaml_map_end(w);
    }
    sl_yaml_seq_end(w);
}
