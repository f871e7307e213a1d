/*
 * Action-level tables (see include/strayline/levels.h): strict reading,
 * ROI-name matching, lifetime-risk tables, statuses and the shielding rule.
 */
#include "strayline/levels.h"
#include "strayline/util.h"
#include "strayline/yamlio.h"

#include <ctype.h>
#include <fnmatch.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

static void kind_free(sl_kind *k)
{
    free(k->kind);
    free(k->description);
    for (size_t i = 0; i < k->npatterns; i++)
        free(k->patterns[i]);
    free(k->patterns);
    for (size_t i = 0; i < k->nlevels; i++) {
        free(k->levels[i].name);
        free(k->levels[i].source);
        free(k->levels[i].mark);
    }
    free(k->levels);
    for (size_t i = 0; i < k->nbands; i++)
        free(k->bands[i].name);
    free(k->bands);
    free(k->bands_source);
    free(k->bands_mark);
    for (size_t i = 0; i < k->nstatements; i++) {
        free(k->statements[i].text);
        free(k->statements[i].source);
        free(k->statements[i].mark);
    }
    free(k->statements);
    free(k->lar_table);
}

void sl_levels_free(sl_levels *l)
{
    if (!l)
        return;
    free(l->source);
    free(l->notice);
    for (size_t i = 0; i < l->nkinds; i++)
        kind_free(&l->kinds[i]);
    free(l->kinds);
    for (size_t i = 0; i < l->ntables; i++) {
        sl_lar_table *t = &l->tables[i];
        free(t->name);
        free(t->source);
        free(t->mark);
        free(t->ages);
        free(t->male);
        free(t->female);
    }
    free(l->tables);
    free(l);
}

static sl_status read_mark(sl_yaml *y, yaml_node_t *n, char **out, sl_error *err)
{
    sl_status st = sl_yaml_string(y, n, "mark", out, err);
    if (st != SL_OK)
        return st;
    static const char *const marks[] = {"published", "secondary", "from memory",
                                        "common practice"};
    for (size_t i = 0; i < 4; i++) {
        if (strcmp(*out, marks[i]) == 0)
            return SL_OK;
    }
    return sl_yaml_error(y, n, err,
                         "mark '%s': expected published, secondary, from memory or common "
                         "practice",
                         *out);
}

static sl_status read_weeks(sl_yaml *y, yaml_node_t *n, double *from, double *to, sl_error *err)
{
    *from = *to = NAN;
    if (!n)
        return SL_OK;
    double *w;
    size_t k;
    sl_status st = sl_yaml_numbers(y, n, "weeks", &w, &k, err);
    if (st != SL_OK)
        return st;
    if (k != 2 || !(w[0] >= 0 && w[1] > w[0] && w[1] <= 45))
        st = sl_yaml_error(y, n, err, "weeks: expected [from, to] with 0 <= from < to <= 45");
    else {
        *from = w[0];
        *to = w[1];
    }
    free(w);
    return st;
}

/* exposure: single | fractionated | any. A single-exposure threshold
 * compared with a fractionated course is said so in the status line. */
static sl_status read_exposure(sl_yaml *y, yaml_node_t *n, sl_level *v, sl_error *err)
{
    char *e = NULL;
    sl_status st = sl_yaml_string(y, n, "exposure", &e, err);
    if (st != SL_OK)
        return st;
    if (strcmp(e, "single") == 0)
        v->single_exposure = true;
    else if (strcmp(e, "fractionated") == 0)
        v->fractionated = true;
    else if (strcmp(e, "any") != 0)
        st = sl_yaml_error(y, n, err, "exposure '%s': expected single, fractionated or any", e);
    free(e);
    return st;
}

static sl_status read_ages(sl_yaml *y, yaml_node_t *n, double *from, double *to, sl_error *err)
{
    *from = *to = NAN;
    if (!n)
        return SL_OK;
    double *w;
    size_t k;
    sl_status st = sl_yaml_numbers(y, n, "ages", &w, &k, err);
    if (st != SL_OK)
        return st;
    if (k != 2 || !(w[0] >= 0 && w[1] > w[0] && w[1] <= 150))
        st = sl_yaml_error(y, n, err, "ages: expected [from, to] years with 0 <= from < to <= 150");
    else {
        *from = w[0];
        *to = w[1];
    }
    free(w);
    return st;
}

/* A band named by a key (pacing_dependent_min_band, neutron_band): its index. */
static sl_status band_index(sl_yaml *y, yaml_node_t *n, const char *key, const sl_kind *k,
                            int *out, sl_error *err)
{
    char *name = NULL;
    sl_status st = sl_yaml_string(y, n, key, &name, err);
    if (st != SL_OK)
        return st;
    *out = -1;
    for (size_t i = 0; i < k->nbands; i++) {
        if (strcmp(k->bands[i].name, name) == 0)
            *out = (int)i;
    }
    if (*out < 0)
        st = sl_yaml_error(y, n, err, "%s '%s': no band of that name", key, name);
    free(name);
    return st;
}

/* A shell pattern whose every '[' opens a bracket expression that closes:
 * fnmatch takes an unclosed '[' literally, so the pattern would silently
 * match nothing a clinic meant it to. */
static bool pattern_ok(const char *p)
{
    for (; *p; p++) {
        if (*p != '[')
            continue;
        const char *q = p + 1;
        if (*q == '!' || *q == '^')
            q++;
        if (*q == ']')
            q++; /* a ']' first in the set is a member */
        while (*q && *q != ']')
            q++;
        if (!*q)
            return false;
        p = q;
    }
    return true;
}

static sl_status read_kind(sl_yaml *y, yaml_node_t *n, size_t idx, sl_levels *l, sl_error *err)
{
    char what[64];
    snprintf(what, sizeof what, "kind %zu", idx + 1);
    sl_kind *k = &l->kinds[idx];
    k->pacing_min_band = k->neutron_band = -1;
    sl_yaml_field f[] = {{"kind", true, NULL},       {"description", false, NULL},
                         {"match", true, NULL},      {"levels", false, NULL},
                         {"bands", false, NULL},     {"statements", false, NULL},
                         {"stochastic", false, NULL}, {"lar_table", false, NULL}};
    sl_status st = sl_yaml_fields(y, n, what, f, 8, err);
    if (st == SL_OK)
        st = sl_yaml_string(y, f[0].node, what, &k->kind, err);
    for (size_t j = 0; st == SL_OK && j < idx; j++) {
        if (strcmp(l->kinds[j].kind, k->kind) == 0)
            st = sl_yaml_error(y, f[0].node, err, "%s: duplicate kind '%s'", what, k->kind);
    }
    if (st == SL_OK && f[1].node)
        st = sl_yaml_string(y, f[1].node, what, &k->description, err);
    yaml_node_item_t *items;
    size_t ni = 0;
    if (st == SL_OK)
        st = sl_yaml_seq(y, f[2].node, "match", &items, &ni, err);
    if (st == SL_OK && ni == 0)
        st = sl_yaml_error(y, f[2].node, err, "%s: match: the list is empty", what);
    if (st == SL_OK && !(k->patterns = calloc(ni, sizeof *k->patterns)))
        st = sl_error_set(err, SL_ENOMEM, "out of memory");
    for (size_t i = 0; st == SL_OK && i < ni; i++) {
        st = sl_yaml_string(y, sl_yaml_item(y, items[i]), "match", &k->patterns[i], err);
        if (st == SL_OK) {
            k->npatterns = i + 1;
            for (char *c = k->patterns[i]; *c; c++)
                *c = (char)tolower((unsigned char)*c);
            if (!pattern_ok(k->patterns[i]))
                st = sl_yaml_error(y, sl_yaml_item(y, items[i]), err,
                                   "%s: match pattern '%s': a '[' without its ']' (it would "
                                   "match nothing, and the organ would pass unjudged)",
                                   what, k->patterns[i]);
        }
    }
    if (st == SL_OK && f[3].node) {
        st = sl_yaml_seq(y, f[3].node, "levels", &items, &ni, err);
        if (st == SL_OK && ni && !(k->levels = calloc(ni, sizeof *k->levels)))
            st = sl_error_set(err, SL_ENOMEM, "out of memory");
        for (size_t i = 0; st == SL_OK && i < ni; i++) {
            sl_level *v = &k->levels[i];
            k->nlevels = i + 1;
            sl_yaml_field g[] = {{"name", true, NULL},   {"dose_gy", true, NULL},
                                 {"weeks", false, NULL}, {"source", true, NULL},
                                 {"mark", true, NULL},   {"exposure", false, NULL}};
            yaml_node_t *ln = sl_yaml_item(y, items[i]);
            st = sl_yaml_fields(y, ln, "level", g, 6, err);
            if (st == SL_OK)
                st = sl_yaml_string(y, g[0].node, "level name", &v->name, err);
            if (st == SL_OK)
                st = sl_yaml_number_in(y, g[1].node, "dose_gy", 1e-4, 100, &v->dose_gy, err);
            if (st == SL_OK)
                st = read_weeks(y, g[2].node, &v->weeks_from, &v->weeks_to, err);
            if (st == SL_OK)
                st = sl_yaml_string(y, g[3].node, "source", &v->source, err);
            if (st == SL_OK)
                st = read_mark(y, g[4].node, &v->mark, err);
            if (st == SL_OK && g[5].node)
                st = read_exposure(y, g[5].node, v, err);
        }
    }
    if (st == SL_OK && f[4].node) {
        sl_yaml_field g[] = {{"source", true, NULL}, {"mark", true, NULL},
                             {"pacing_dependent_shift", false, NULL}, {"list", true, NULL},
                             {"pacing_dependent_min_band", false, NULL},
                             {"neutron_band", false, NULL}};
        st = sl_yaml_fields(y, f[4].node, "bands", g, 6, err);
        if (st == SL_OK)
            st = sl_yaml_string(y, g[0].node, "source", &k->bands_source, err);
        if (st == SL_OK)
            st = read_mark(y, g[1].node, &k->bands_mark, err);
        if (st == SL_OK && g[2].node)
            st = sl_yaml_int(y, g[2].node, "pacing_dependent_shift", &k->pacing_shift, err);
        if (st == SL_OK && (k->pacing_shift < 0 || k->pacing_shift > 3))
            st = sl_yaml_error(y, g[2].node, err, "pacing_dependent_shift: 0 to 3 bands");
        if (st == SL_OK)
            st = sl_yaml_seq(y, g[3].node, "bands list", &items, &ni, err);
        if (st == SL_OK && ni < 2)
            st = sl_yaml_error(y, g[3].node, err, "bands: at least two bands");
        if (st == SL_OK && !(k->bands = calloc(ni, sizeof *k->bands)))
            st = sl_error_set(err, SL_ENOMEM, "out of memory");
        for (size_t i = 0; st == SL_OK && i < ni; i++) {
            sl_band *b = &k->bands[i];
            k->nbands = i + 1;
            yaml_node_t *bn = sl_yaml_item(y, items[i]);
            sl_yaml_field h[] = {{"name", true, NULL}, {"below_gy", i + 1 < ni, NULL}};
            st = sl_yaml_fields(y, bn, "band", h, 2, err);
            if (st == SL_OK)
                st = sl_yaml_string(y, h[0].node, "band name", &b->name, err);
            b->below_gy = INFINITY;
            if (st == SL_OK && h[1].node && i + 1 == ni)
                st = sl_yaml_error(y, h[1].node, err, "the last band has no upper edge");
            if (st == SL_OK && h[1].node)
                st = sl_yaml_number_in(y, h[1].node, "below_gy", 1e-3, 100, &b->below_gy, err);
            if (st == SL_OK && i > 0 && !(b->below_gy > k->bands[i - 1].below_gy))
                st = sl_yaml_error(y, bn, err, "bands: the upper edges must increase");
        }
        if (st == SL_OK && g[4].node)
            st = band_index(y, g[4].node, "pacing_dependent_min_band", k, &k->pacing_min_band,
                            err);
        if (st == SL_OK && g[5].node)
            st = band_index(y, g[5].node, "neutron_band", k, &k->neutron_band, err);
    }
    if (st == SL_OK && f[5].node) {
        st = sl_yaml_seq(y, f[5].node, "statements", &items, &ni, err);
        if (st == SL_OK && ni && !(k->statements = calloc(ni, sizeof *k->statements)))
            st = sl_error_set(err, SL_ENOMEM, "out of memory");
        for (size_t i = 0; st == SL_OK && i < ni; i++) {
            sl_statement *s = &k->statements[i];
            k->nstatements = i + 1;
            s->per_gy = NAN;
            sl_yaml_field g[] = {{"text", true, NULL},   {"weeks", false, NULL},
                                 {"per_gy", false, NULL}, {"source", true, NULL},
                                 {"mark", true, NULL},   {"ages", false, NULL}};
            st = sl_yaml_fields(y, sl_yaml_item(y, items[i]), "statement", g, 6, err);
            if (st == SL_OK)
                st = sl_yaml_string(y, g[0].node, "text", &s->text, err);
            if (st == SL_OK)
                st = read_weeks(y, g[1].node, &s->weeks_from, &s->weeks_to, err);
            if (st == SL_OK && g[2].node)
                st = sl_yaml_number_in(y, g[2].node, "per_gy", 0, 1, &s->per_gy, err);
            if (st == SL_OK)
                st = sl_yaml_string(y, g[3].node, "source", &s->source, err);
            if (st == SL_OK)
                st = read_mark(y, g[4].node, &s->mark, err);
            if (st == SL_OK)
                st = read_ages(y, g[5].node, &s->ages_from, &s->ages_to, err);
        }
    }
    if (st == SL_OK && f[6].node)
        st = sl_yaml_bool(y, f[6].node, "stochastic", &k->stochastic, err);
    if (st == SL_OK && f[7].node)
        st = sl_yaml_string(y, f[7].node, "lar_table", &k->lar_table, err);
    if (st == SL_OK && k->nlevels && k->nbands)
        st = sl_yaml_error(y, n, err, "%s: a kind has levels or bands, not both", what);
    return st;
}

static sl_status read_table(sl_yaml *y, yaml_node_t *n, sl_lar_table *t, sl_error *err)
{
    sl_yaml_field f[] = {{"name", true, NULL}, {"source", true, NULL}, {"mark", true, NULL},
                         {"ages", true, NULL}, {"male", false, NULL},  {"female", false, NULL}};
    sl_status st = sl_yaml_fields(y, n, "lar table", f, 6, err);
    if (st == SL_OK)
        st = sl_yaml_string(y, f[0].node, "name", &t->name, err);
    if (st == SL_OK)
        st = sl_yaml_string(y, f[1].node, "source", &t->source, err);
    if (st == SL_OK)
        st = read_mark(y, f[2].node, &t->mark, err);
    if (st == SL_OK)
        st = sl_yaml_numbers(y, f[3].node, "ages", &t->ages, &t->nages, err);
    for (size_t i = 1; st == SL_OK && i < t->nages; i++) {
        if (!(t->ages[i] > t->ages[i - 1]))
            st = sl_yaml_error(y, f[3].node, err, "ages: not increasing");
    }
    if (st == SL_OK && t->nages < 2)
        st = sl_yaml_error(y, f[3].node, err, "ages: at least two ages");
    double **cols[2] = {&t->male, &t->female};
    for (int s = 0; st == SL_OK && s < 2; s++) {
        if (!f[4 + s].node)
            continue;
        size_t k;
        st = sl_yaml_numbers(y, f[4 + s].node, f[4 + s].key, cols[s], &k, err);
        if (st == SL_OK && k != t->nages)
            st = sl_yaml_error(y, f[4 + s].node, err, "%s: %zu values for %zu ages", f[4 + s].key,
                               k, t->nages);
        for (size_t i = 0; st == SL_OK && i < k; i++) {
            if ((*cols[s])[i] < 0)
                st = sl_yaml_error(y, f[4 + s].node, err, "%s: a negative risk", f[4 + s].key);
        }
    }
    if (st == SL_OK && !t->male && !t->female)
        st = sl_yaml_error(y, n, err, "lar table '%s': neither male nor female values", t->name);
    return st;
}

sl_status sl_levels_load_buffer(const char *data, size_t size, const char *name,
                                sl_levels **out, sl_error *err)
{
    *out = NULL;
    sl_levels *l = calloc(1, sizeof *l);
    if (!l)
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    bool ok = true;
    l->source = sl_strdup(name, &ok);
    sl_sha256_buffer(data, size, l->sha256);
    sl_yaml y;
    sl_status st = ok ? sl_yaml_load_buffer(&y, data, size, name, err) : SL_ENOMEM;
    if (st != SL_OK) {
        sl_levels_free(l);
        return st;
    }
    sl_yaml_field f[] = {{"format", true, NULL}, {"format_version", true, NULL},
                         {"notice", false, NULL}, {"kinds", true, NULL},
                         {"lar_tables", false, NULL}};
    st = sl_yaml_fields(&y, sl_yaml_root(&y), "action levels", f, 5, err);
    char *format = NULL;
    int version = 0;
    if (st == SL_OK)
        st = sl_yaml_string(&y, f[0].node, "format", &format, err);
    if (st == SL_OK && strcmp(format, SL_LEVELS_FORMAT) != 0)
        st = sl_yaml_error(&y, f[0].node, err, "format '%s': not a strayline action-level table",
                           format);
    free(format);
    if (st == SL_OK)
        st = sl_yaml_int(&y, f[1].node, "format_version", &version, err);
    if (st == SL_OK && version != 1)
        st = sl_yaml_error(&y, f[1].node, err, "format_version %d: only version 1 is known",
                           version);
    if (st == SL_OK && f[2].node)
        st = sl_yaml_string(&y, f[2].node, "notice", &l->notice, err);
    yaml_node_item_t *items;
    size_t n = 0;
    if (st == SL_OK)
        st = sl_yaml_seq(&y, f[3].node, "kinds", &items, &n, err);
    if (st == SL_OK && n && !(l->kinds = calloc(n, sizeof *l->kinds)))
        st = sl_error_set(err, SL_ENOMEM, "out of memory");
    for (size_t i = 0; st == SL_OK && i < n; i++) {
        l->nkinds = i + 1;
        st = read_kind(&y, sl_yaml_item(&y, items[i]), i, l, err);
    }
    if (st == SL_OK && f[4].node) {
        st = sl_yaml_seq(&y, f[4].node, "lar_tables", &items, &n, err);
        if (st == SL_OK && n && !(l->tables = calloc(n, sizeof *l->tables)))
            st = sl_error_set(err, SL_ENOMEM, "out of memory");
        for (size_t i = 0; st == SL_OK && i < n; i++) {
            l->ntables = i + 1;
            st = read_table(&y, sl_yaml_item(&y, items[i]), &l->tables[i], err);
        }
    }
    for (size_t i = 0; st == SL_OK && i < l->nkinds; i++) {
        const sl_kind *k = &l->kinds[i];
        if (k->lar_table && !sl_levels_table(l, k->lar_table))
            st = sl_error_set(err, SL_EINPUT, "%s: kind '%s' names lar_table '%s', which is not "
                                              "given",
                              name, k->kind, k->lar_table);
    }
    sl_yaml_free(&y);
    if (st != SL_OK) {
        sl_levels_free(l);
        return st;
    }
    *out = l;
    return SL_OK;
}

sl_status sl_levels_load(const char *path, sl_levels **out, sl_error *err)
{
    char *data;
    size_t size;
    *out = NULL;
    sl_status st = sl_read_file(path, SL_YAML_MAX_BYTES, &data, &size, err);
    if (st != SL_OK)
        return st;
    st = sl_levels_load_buffer(data, size, path, out, err);
    free(data);
    return st;
}

const sl_kind *sl_levels_match(const sl_levels *l, const char *roi_name)
{
    char low[256];
    snprintf(low, sizeof low, "%s", roi_name);
    for (char *c = low; *c; c++)
        *c = (char)tolower((unsigned char)*c);
    for (size_t i = 0; i < l->nkinds; i++) {
        for (size_t p = 0; p < l->kinds[i].npatterns; p++) {
            if (fnmatch(l->kinds[i].patterns[p], low, 0) == 0)
                return &l->kinds[i];
        }
    }
    return NULL;
}

const sl_kind *sl_levels_kind(const sl_levels *l, const char *kind)
{
    for (size_t i = 0; i < l->nkinds; i++) {
        if (strcmp(l->kinds[i].kind, kind) == 0)
            return &l->kinds[i];
    }
    return NULL;
}

const sl_lar_table *sl_levels_table(const sl_levels *l, const char *name)
{
    for (size_t i = 0; i < l->ntables; i++) {
        if (strcmp(l->tables[i].name, name) == 0)
            return &l->tables[i];
    }
    return NULL;
}

bool sl_level_applies(double from, double to, double weeks)
{
    if (isnan(from))
        return true;
    /* weeks w belongs to [from, to): week 8 is in 8-15, not 2-8 */
    return !isnan(weeks) && weeks >= from && weeks < to;
}

double sl_weeks_after_conception(double gestational_weeks)
{
    double w = gestational_weeks - SL_LMP_TO_CONCEPTION_WEEKS;
    return w < 0 ? 0 : w;
}

static bool parse_da(const char *s, int *y, int *m, int *d)
{
    if (!s || strlen(s) != 8)
        return false;
    for (int i = 0; i < 8; i++)
        if (!isdigit((unsigned char)s[i]))
            return false;
    *y = (s[0] - '0') * 1000 + (s[1] - '0') * 100 + (s[2] - '0') * 10 + (s[3] - '0');
    *m = (s[4] - '0') * 10 + (s[5] - '0');
    *d = (s[6] - '0') * 10 + (s[7] - '0');
    static const int days[] = {31, 29, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31};
    return *y >= 1850 && *m >= 1 && *m <= 12 && *d >= 1 && *d <= days[*m - 1];
}

bool sl_age_on(const char *birth_da, const char *date_da, double *years)
{
    int by, bm, bd, y, m, d;
    if (!parse_da(birth_da, &by, &bm, &bd) || !parse_da(date_da, &y, &m, &d))
        return false;
    int age = y - by - ((m < bm || (m == bm && d < bd)) ? 1 : 0);
    if (age < 0)
        return false;
    *years = age;
    return true;
}

void sl_patient_init(sl_patient *p)
{
    memset(p, 0, sizeof *p);
    p->gestational_weeks = p->conception_weeks = p->age_years = NAN;
}

double sl_lar_cases(const sl_lar_table *t, char sex, double age, double dose_gy)
{
    const double *col = sex == 'M' ? t->male : sex == 'F' ? t->female : NULL;
    if (!col || !(age >= t->ages[0]) || age > t->ages[t->nages - 1])
        return NAN;
    size_t i = 0;
    while (i + 2 < t->nages && age > t->ages[i + 1])
        i++;
    double w = (age - t->ages[i]) / (t->ages[i + 1] - t->ages[i]);
    double per_01gy = col[i] + w * (col[i + 1] - col[i]);
    return per_01gy * dose_gy / 0.1;
}

const char *sl_status_text(sl_status_kind s)
{
    switch (s) {
    case SL_ST_BELOW: return "below level";
    case SL_ST_MAY_EXCEED: return "MAY EXCEED level (upper bound)";
    case SL_ST_EXCEEDS: return "EXCEEDS level";
    case SL_ST_BAND: return "risk band";
    case SL_ST_NO_LEVEL: return "no action level";
    case SL_ST_IN_FIELD: return "in field: use the planning system's dose";
    case SL_ST_NOT_ASSESSED: return "not assessed";
    }
    return "?";
}

bool sl_status_flagged(sl_status_kind s, int band, size_t nbands)
{
    (void)nbands;
    return s == SL_ST_MAY_EXCEED || s == SL_ST_EXCEEDS || (s == SL_ST_BAND && band >= 1);
}

double sl_lead_mm(double energy_mev)
{
    return energy_mev / 2.0 + 1.0;
}

double sl_alloy_mm(double energy_mev)
{
    return 1.2 * sl_lead_mm(energy_mev);
}
