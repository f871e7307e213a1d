/*
 * Per-patient facts for a batch: what `estimate` takes as options for one
 * patient (gestational age, pacing dependence, organ kinds, doses from
 * elsewhere, age and sex) given in a YAML file keyed by patient ID or plan
 * SOP Instance UID, so that `scan` and `listen` can screen many plans at
 * once. Read strictly with the shared YAML helpers; the format is in
 * README.md.
 */
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "strayline/scan.h"
#include "strayline/yamlio.h"

#define FACTS_FORMAT "strayline-patient-facts"

static void entry_free(sl_facts_entry *e)
{
    free(e->key);
    for (size_t i = 0; i < e->nmap; i++) {
        free((char *)e->map[i].roi);
        free((char *)e->map[i].kind);
    }
    free(e->map);
    for (size_t i = 0; i < e->nother; i++)
        free((char *)e->other[i].roi);
    free(e->other);
}

void sl_facts_free(sl_facts *f)
{
    if (!f)
        return;
    for (size_t i = 0; i < f->n; i++)
        entry_free(&f->items[i]);
    free(f->items);
    free(f->source);
    free(f);
}

static const sl_facts_entry *find_key(const sl_facts *f, const char *key)
{
    for (size_t i = 0; key && i < f->n; i++)
        if (strcmp(f->items[i].key, key) == 0)
            return &f->items[i];
    return NULL;
}

const sl_facts_entry *sl_facts_find(const sl_facts *f, const char *plan_uid,
                                    const char *patient_id)
{
    const sl_facts_entry *u = find_key(f, plan_uid);
    return u ? u : find_key(f, patient_id);
}

void sl_facts_view_free(sl_facts_entry *v)
{
    free(v->key);
    free(v->map);
    free(v->other);
    memset(v, 0, sizeof *v);
}

sl_status sl_facts_view(const sl_facts *f, const char *plan_uid, const char *patient_id,
                        sl_facts_entry *out, bool *found, sl_error *err)
{
    memset(out, 0, sizeof *out);
    const sl_facts_entry *u = find_key(f, plan_uid), *p = find_key(f, patient_id);
    if (p == u)
        p = NULL; /* a key that is both: one entry */
    *found = u || p;
    if (!*found)
        return SL_OK;
    /* one entry alone is merged with an empty one: the same rules serve */
    static const sl_facts_entry none = {.gestational_weeks = NAN, .conception_weeks = NAN,
                                        .age_years = NAN};
    size_t kl = (u ? strlen(u->key) : 0) + (p ? strlen(p->key) : 0) + 4;
    if (!u)
        u = &none;
    if (!p)
        p = &none;
    out->key = malloc(kl);
    out->map = calloc(u->nmap + p->nmap + 1, sizeof *out->map);
    out->other = calloc(u->nother + p->nother + 1, sizeof *out->other);
    if (!out->key || !out->map || !out->other) {
        sl_facts_view_free(out);
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    }
    snprintf(out->key, kl, "%s%s%s", u->key ? u->key : "", u->key && p->key ? " + " : "",
             p->key ? p->key : "");
    bool weeks = !isnan(u->gestational_weeks) || !isnan(u->conception_weeks);
    out->gestational_weeks = weeks ? u->gestational_weeks : p->gestational_weeks;
    out->conception_weeks = weeks ? u->conception_weeks : p->conception_weeks;
    out->pacing_dependent = u->pacing_dependent || p->pacing_dependent;
    out->pacing_stated = u->pacing_stated || p->pacing_stated;
    out->age_years = !isnan(u->age_years) ? u->age_years : p->age_years;
    out->sex = u->sex ? u->sex : p->sex;
    for (size_t i = 0; i < u->nmap; i++)
        out->map[out->nmap++] = u->map[i];
    for (size_t i = 0; i < p->nmap; i++) {
        bool named = false;
        for (size_t k = 0; k < u->nmap && !named; k++)
            named = strcmp(u->map[k].roi, p->map[i].roi) == 0;
        if (!named)
            out->map[out->nmap++] = p->map[i];
    }
    for (size_t i = 0; i < u->nother; i++)
        out->other[out->nother++] = u->other[i];
    for (size_t i = 0; i < p->nother; i++) {
        bool named = false;
        for (size_t k = 0; k < u->nother && !named; k++)
            named = strcmp(u->other[k].roi, p->other[i].roi) == 0;
        if (!named)
            out->other[out->nother++] = p->other[i];
    }
    return SL_OK;
}

static sl_status read_pairs(sl_yaml *y, yaml_node_t *n, const char *what, bool dose,
                            sl_facts_entry *e, sl_error *err)
{
    yaml_node_item_t *items;
    size_t ni;
    sl_status st = sl_yaml_seq(y, n, what, &items, &ni, err);
    if (st != SL_OK)
        return st;
    if (dose)
        e->other = calloc(ni ? ni : 1, sizeof *e->other);
    else
        e->map = calloc(ni ? ni : 1, sizeof *e->map);
    if (dose ? !e->other : !e->map)
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    for (size_t i = 0; i < ni && st == SL_OK; i++) {
        yaml_node_t *it = sl_yaml_item(y, items[i]);
        sl_yaml_field g[] = {{"roi", true, NULL}, {dose ? "cgy" : "kind", true, NULL}};
        st = sl_yaml_fields(y, it, what, g, 2, err);
        char *roi = NULL, *kind = NULL;
        double cgy = NAN;
        if (st == SL_OK)
            st = sl_yaml_string(y, g[0].node, "roi", &roi, err);
        if (st == SL_OK)
            st = dose ? sl_yaml_number_in(y, g[1].node, "cgy", 1e-9, 1e5, &cgy, err)
                      : sl_yaml_string(y, g[1].node, "kind", &kind, err);
        if (st != SL_OK) {
            free(roi);
            free(kind);
            break;
        }
        if (dose)
            e->other[e->nother++] = (sl_other_dose){roi, cgy};
        else
            e->map[e->nmap++] = (sl_organ_map){roi, kind};
    }
    return st;
}

static sl_status read_entry(sl_yaml *y, yaml_node_t *n, sl_facts_entry *e, sl_error *err)
{
    e->gestational_weeks = e->conception_weeks = e->age_years = NAN;
    sl_yaml_field f[] = {{"key", true, NULL},
                         {"gestational_age_weeks", false, NULL},
                         {"weeks_after_conception", false, NULL},
                         {"pacing_dependent", false, NULL},
                         {"age_years", false, NULL},
                         {"sex", false, NULL},
                         {"organs", false, NULL},
                         {"other_dose", false, NULL}};
    sl_status st = sl_yaml_fields(y, n, "patient", f, 8, err);
    if (st == SL_OK)
        st = sl_yaml_string(y, f[0].node, "key", &e->key, err);
    if (st == SL_OK && !e->key[0])
        st = sl_yaml_error(y, f[0].node, err, "key: empty (a patient ID or a plan UID)");
    if (st == SL_OK && f[1].node)
        st = sl_yaml_number_in(y, f[1].node, "gestational_age_weeks", 0, 44,
                               &e->gestational_weeks, err);
    if (st == SL_OK && f[2].node)
        st = sl_yaml_number_in(y, f[2].node, "weeks_after_conception", 0, 42,
                               &e->conception_weeks, err);
    if (st == SL_OK && f[1].node && f[2].node)
        st = sl_yaml_error(y, f[2].node, err, "give gestational_age_weeks or "
                                              "weeks_after_conception, not both");
    if (st == SL_OK && f[3].node)
        st = sl_yaml_bool(y, f[3].node, "pacing_dependent", &e->pacing_dependent, err);
    e->pacing_stated = st == SL_OK && f[3].node;
    if (st == SL_OK && f[4].node)
        st = sl_yaml_number_in(y, f[4].node, "age_years", 0, 120, &e->age_years, err);
    if (st == SL_OK && f[5].node) {
        char *s = NULL;
        st = sl_yaml_string(y, f[5].node, "sex", &s, err);
        if (st == SL_OK && strcmp(s, "M") != 0 && strcmp(s, "F") != 0)
            st = sl_yaml_error(y, f[5].node, err, "sex: '%s': M or F", s);
        if (st == SL_OK)
            e->sex = s[0];
        free(s);
    }
    if (st == SL_OK && f[6].node)
        st = read_pairs(y, f[6].node, "organs", false, e, err);
    if (st == SL_OK && f[7].node)
        st = read_pairs(y, f[7].node, "other_dose", true, e, err);
    return st;
}

sl_status sl_facts_check_kinds(const sl_facts *f, const sl_levels *levels,
                               const char *levels_path, sl_error *err)
{
    for (size_t i = 0; f && i < f->n; i++) {
        const sl_facts_entry *e = &f->items[i];
        for (size_t m = 0; m < e->nmap; m++)
            if (!sl_levels_kind(levels, e->map[m].kind))
                return sl_error_set(err, SL_EINPUT,
                                    "%s: entry '%s': organs: ROI '%s' is given kind '%s', which "
                                    "is not a kind of %s",
                                    f->source, e->key, e->map[m].roi, e->map[m].kind,
                                    levels_path ? levels_path : "the action-level table");
    }
    return SL_OK;
}

sl_status sl_facts_load(const char *path, sl_facts **out, sl_error *err)
{
    *out = NULL;
    sl_yaml y = {0};
    sl_status st = sl_yaml_load(&y, path, err);
    if (st != SL_OK)
        return st;
    sl_facts *f = calloc(1, sizeof *f);
    if (!f || !(f->source = strdup(path))) {
        sl_yaml_free(&y);
        sl_facts_free(f);
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    }
    sl_yaml_field top[] = {{"format", true, NULL}, {"notice", false, NULL},
                           {"patients", true, NULL}};
    st = sl_yaml_fields(&y, sl_yaml_root(&y), "patient facts", top, 3, err);
    char *format = NULL;
    if (st == SL_OK)
        st = sl_yaml_string(&y, top[0].node, "format", &format, err);
    if (st == SL_OK && strcmp(format, FACTS_FORMAT) != 0)
        st = sl_yaml_error(&y, top[0].node, err, "format: '%s': expected '%s'", format,
                           FACTS_FORMAT);
    free(format);
    yaml_node_item_t *items = NULL;
    size_t ni = 0;
    if (st == SL_OK)
        st = sl_yaml_seq(&y, top[2].node, "patients", &items, &ni, err);
    if (st == SL_OK && !(f->items = calloc(ni ? ni : 1, sizeof *f->items)))
        st = sl_error_set(err, SL_ENOMEM, "out of memory");
    for (size_t i = 0; st == SL_OK && i < ni; i++) {
        yaml_node_t *n = sl_yaml_item(&y, items[i]);
        f->n = i + 1;
        st = read_entry(&y, n, &f->items[i], err);
        for (size_t j = 0; st == SL_OK && j < i; j++)
            if (strcmp(f->items[j].key, f->items[i].key) == 0)
                st = sl_yaml_error(&y, n, err, "key '%s' given twice", f->items[i].key);
    }
    sl_yaml_free(&y);
    if (st != SL_OK) {
        sl_facts_free(f);
        return st;
    }
    *out = f;
    return SL_OK;
}
