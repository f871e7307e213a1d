/*
 * The in-vivo readings file (YAML, format strayline-invivo-readings): read
 * strictly, as the model file is, because its numbers go beside clinical
 * estimates. Every reading states its position, fractions, detector,
 * reading and energy correction explicitly; the only absent values allowed
 * are an energy correction (then a warning follows at `invivo add`), the
 * fraction group of a one-group plan and an added uncertainty (nothing
 * added). A diode has no reference uncertainty here, so it must state one.
 */
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "strayline/invivo.h"
#include "strayline/util.h"
#include "strayline/yamlio.h"

static void reading_free(sl_reading *r)
{
    free(r->id);
    free(r->patient_id);
    free(r->plan_uid);
    free(r->plan_path);
    free(r->ss_path);
    free(r->date);
    free(r->roi);
    free(r->kind);
    free(r->detector);
}

void sl_readings_free(sl_readings *r)
{
    if (!r)
        return;
    for (size_t i = 0; i < r->n; i++)
        reading_free(&r->r[i]);
    free(r->r);
    free(r->path);
    free(r->notice);
    free(r);
}

/* A file named in the readings file is relative to the readings file. */
static char *resolve(const char *base, const char *rel)
{
    if (rel[0] == '/')
        return strdup(rel);
    const char *slash = strrchr(base, '/');
    size_t nb = slash ? (size_t)(slash - base) + 1 : 0;
    size_t nr = strlen(rel);
    char *p = malloc(nb + nr + 1);
    if (!p)
        return NULL;
    memcpy(p, base, nb);
    memcpy(p + nb, rel, nr + 1);
    return p;
}

/* YYYY-MM-DD, a plausible calendar date (the log sorts and reports by it). */
static bool valid_date(const char *s)
{
    if (strlen(s) != 10 || s[4] != '-' || s[7] != '-')
        return false;
    for (int i = 0; i < 10; i++)
        if (i != 4 && i != 7 && (s[i] < '0' || s[i] > '9'))
            return false;
    int y = atoi(s), m = atoi(s + 5), d = atoi(s + 8);
    return y >= 1950 && y <= 2200 && m >= 1 && m <= 12 && d >= 1 && d <= 31;
}

static sl_status read_position(sl_yaml *y, yaml_node_t *n, sl_reading *r, sl_error *err)
{
    sl_yaml_field f[] = {{"roi", false, NULL},         {"name", false, NULL},
                         {"kind", false, NULL},        {"point_mm", false, NULL},
                         {"point_cm", false, NULL},    {"distance_cm", false, NULL},
                         {"depth_cm", false, NULL}};
    sl_status st = sl_yaml_fields(y, n, "position", f, 7, err);
    if (st != SL_OK)
        return st;
    int forms = (f[0].node != NULL) + (f[3].node != NULL) + (f[4].node != NULL) +
                (f[5].node != NULL || f[6].node != NULL);
    if (forms != 1)
        return sl_yaml_error(y, n, err,
                             "position: give exactly one of roi (its point nearest the field "
                             "edge), point_mm or point_cm [x, y, z] (patient coordinates), or "
                             "distance_cm with depth_cm (a landmark measured on the patient)");
    if (f[0].node) {
        if (f[1].node || f[2].node)
            return sl_yaml_error(y, f[1].node ? f[1].node : f[2].node, err,
                                 "position: a ROI position takes no name or kind (the ROI's "
                                 "own are used)");
        r->pos = SL_POS_ROI;
        return sl_yaml_string(y, f[0].node, "position roi", &r->roi, err);
    }
    if (!f[1].node || !f[2].node)
        return sl_yaml_error(y, n, err,
                             "position: a point or landmark needs a name and an organ kind "
                             "(as in the action-level table)");
    st = sl_yaml_string(y, f[1].node, "position name", &r->roi, err);
    if (st == SL_OK)
        st = sl_yaml_string(y, f[2].node, "position kind", &r->kind, err);
    if (st != SL_OK)
        return st;
    if (f[3].node || f[4].node) {
        yaml_node_t *p = f[3].node ? f[3].node : f[4].node;
        double *v = NULL;
        size_t nv = 0;
        st = sl_yaml_numbers(y, p, f[3].node ? "point_mm" : "point_cm", &v, &nv, err);
        if (st == SL_OK && nv != 3)
            st = sl_yaml_error(y, p, err, "position: a point needs three coordinates [x, y, z]");
        double scale = f[3].node ? 1 : 10;
        for (size_t i = 0; st == SL_OK && i < 3; i++) {
            r->point_mm[i] = v[i] * scale;
            /* a patient lies within metres of the DICOM origin */
            if (fabs(r->point_mm[i]) > 5000)
                st = sl_yaml_error(y, p, err, "position: coordinate %g mm is more than 5 m from "
                                              "the origin: check the unit",
                                   r->point_mm[i]);
        }
        free(v);
        r->pos = SL_POS_POINT;
        return st;
    }
    if (!f[5].node || !f[6].node)
        return sl_yaml_error(y, n, err, "position: a landmark needs both distance_cm and depth_cm");
    r->pos = SL_POS_LANDMARK;
    st = sl_yaml_number_in(y, f[5].node, "distance_cm", 0, 200, &r->distance_cm, err);
    if (st == SL_OK)
        st = sl_yaml_number_in(y, f[6].node, "depth_cm", 0, 50, &r->depth_cm, err);
    return st;
}

static sl_status read_one(sl_yaml *y, yaml_node_t *n, const char *base, sl_reading *r,
                          sl_error *err)
{
    r->line = (int)n->start_mark.line + 1;
    r->energy_correction = NAN;
    sl_yaml_field f[] = {
        {"id", true, NULL},           {"patient_id", true, NULL},
        {"plan_uid", false, NULL},    {"plan", false, NULL},
        {"structure_set", false, NULL}, {"date", true, NULL},
        {"position", true, NULL},     {"fractions", true, NULL},
        {"fraction_group", false, NULL}, {"detector", true, NULL},
        {"reading_cgy", true, NULL},  {"energy_correction", true, NULL},
        {"detector_uncertainty_percent", false, NULL},
        {"added_uncertainty_percent", false, NULL}};
    sl_status st = sl_yaml_fields(y, n, "reading", f, 14, err);
    if (st == SL_OK)
        st = sl_yaml_string(y, f[0].node, "id", &r->id, err);
    if (st == SL_OK)
        st = sl_yaml_string(y, f[1].node, "patient_id", &r->patient_id, err);
    if (st == SL_OK && f[2].node)
        st = sl_yaml_string(y, f[2].node, "plan_uid", &r->plan_uid, err);
    if (st == SL_OK && (f[3].node != NULL) != (f[4].node != NULL))
        st = sl_yaml_error(y, n, err, "reading '%s': give both plan and structure_set files, or "
                                      "neither",
                           r->id);
    if (st == SL_OK && !f[3].node && !f[2].node)
        st = sl_yaml_error(y, n, err, "reading '%s': needs plan_uid or the plan and "
                                      "structure_set files",
                           r->id);
    char *s = NULL;
    if (st == SL_OK && f[3].node && (st = sl_yaml_string(y, f[3].node, "plan", &s, err)) == SL_OK) {
        if (!(r->plan_path = resolve(base, s)))
            st = sl_error_set(err, SL_ENOMEM, "out of memory");
        free(s);
        s = NULL;
    }
    if (st == SL_OK && f[4].node &&
        (st = sl_yaml_string(y, f[4].node, "structure_set", &s, err)) == SL_OK) {
        if (!(r->ss_path = resolve(base, s)))
            st = sl_error_set(err, SL_ENOMEM, "out of memory");
        free(s);
        s = NULL;
    }
    if (st == SL_OK)
        st = sl_yaml_string(y, f[5].node, "date", &r->date, err);
    if (st == SL_OK && !valid_date(r->date))
        st = sl_yaml_error(y, f[5].node, err, "date '%s': needs YYYY-MM-DD", r->date);
    if (st == SL_OK)
        st = read_position(y, f[6].node, r, err);
    if (st == SL_OK)
        st = sl_yaml_int(y, f[7].node, "fractions", &r->fractions, err);
    if (st == SL_OK && (r->fractions < 1 || r->fractions > 100))
        st = sl_yaml_error(y, f[7].node, err, "fractions %d: the fractions the dosimeter stayed "
                                              "on for, 1 to 100",
                           r->fractions);
    if (st == SL_OK && f[8].node)
        st = sl_yaml_int(y, f[8].node, "fraction_group", &r->fraction_group, err);
    if (st == SL_OK && f[8].node && r->fraction_group < 1)
        st = sl_yaml_error(y, f[8].node, err, "fraction_group: a Fraction Group Number (1 or "
                                              "more)");
    if (st == SL_OK)
        st = sl_yaml_string(y, f[9].node, "detector", &r->detector, err);
    bool diode = false;
    if (st == SL_OK) {
        if (strcmp(r->detector, "TLD") == 0)
            r->u_detector = SL_INVIVO_U_TLD;
        else if (strcmp(r->detector, "OSL") == 0)
            r->u_detector = SL_INVIVO_U_OSL;
        else if (strcmp(r->detector, "diode") == 0)
            diode = true;
        else
            st = sl_yaml_error(y, f[9].node, err, "detector '%s': TLD, OSL or diode",
                               r->detector);
    }
    if (st == SL_OK)
        st = sl_yaml_number_in(y, f[10].node, "reading_cgy", 0, 1e5, &r->reading_cgy, err);
    if (st == SL_OK && !(r->reading_cgy > 0))
        st = sl_yaml_error(y, f[10].node, err, "reading_cgy: a reading of 0 cannot be compared "
                                               "on a log scale; give the reading in cGy");
    if (st == SL_OK) {
        yaml_node_t *c = f[11].node;
        if (c->type == YAML_SCALAR_NODE && strcmp((const char *)c->data.scalar.value, "none") == 0)
            r->energy_correction = NAN;
        else
            st = sl_yaml_number_in(y, c, "energy_correction (a factor, or none)", 0.5, 1.5,
                                   &r->energy_correction, err);
    }
    double u;
    if (st == SL_OK && f[12].node) {
        st = sl_yaml_number_in(y, f[12].node, "detector_uncertainty_percent", 0.1, 50, &u, err);
        r->u_detector = u / 100;
    } else if (st == SL_OK && diode)
        st = sl_yaml_error(y, n, err, "reading '%s': a diode needs detector_uncertainty_percent "
                                      "(no reference value is kept for diodes)",
                           r->id);
    if (st == SL_OK && f[13].node) {
        st = sl_yaml_number_in(y, f[13].node, "added_uncertainty_percent", 0, 100, &u, err);
        r->u_added = u / 100;
    }
    return st;
}

sl_status sl_readings_load(const char *path, sl_readings **out, sl_error *err)
{
    *out = NULL;
    sl_readings *rs = calloc(1, sizeof *rs);
    if (!rs || !(rs->path = strdup(path))) {
        free(rs);
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    }
    sl_yaml y = {0};
    sl_status st = sl_yaml_load(&y, path, err);
    sl_yaml_field k[] = {{"format", true, NULL},
                         {"format_version", true, NULL},
                         {"notice", false, NULL},
                         {"readings", true, NULL}};
    if (st == SL_OK)
        st = sl_yaml_fields(&y, sl_yaml_root(&y), "readings file", k, 4, err);
    char *format = NULL;
    if (st == SL_OK)
        st = sl_yaml_string(&y, k[0].node, "format", &format, err);
    if (st == SL_OK && strcmp(format, SL_INVIVO_FORMAT) != 0)
        st = sl_yaml_error(&y, k[0].node, err, "format '%s': not a strayline readings file (%s)",
                           format, SL_INVIVO_FORMAT);
    free(format);
    int v = 0;
    if (st == SL_OK)
        st = sl_yaml_int(&y, k[1].node, "format_version", &v, err);
    if (st == SL_OK && v != SL_INVIVO_FORMAT_VERSION)
        st = sl_yaml_error(&y, k[1].node, err, "format_version %d: this strayline reads version %d",
                           v, SL_INVIVO_FORMAT_VERSION);
    if (st == SL_OK && k[2].node)
        st = sl_yaml_string(&y, k[2].node, "notice", &rs->notice, err);
    yaml_node_item_t *items;
    size_t n = 0;
    if (st == SL_OK)
        st = sl_yaml_seq(&y, k[3].node, "readings", &items, &n, err);
    if (st == SL_OK && n == 0)
        st = sl_yaml_error(&y, k[3].node, err, "readings: the list is empty");
    if (st == SL_OK && !(rs->r = calloc(n, sizeof *rs->r)))
        st = sl_error_set(err, SL_ENOMEM, "out of memory");
    for (size_t i = 0; st == SL_OK && i < n; i++) {
        rs->n = i + 1;
        yaml_node_t *item = sl_yaml_item(&y, items[i]);
        st = read_one(&y, item, path, &rs->r[i], err);
        for (size_t j = 0; st == SL_OK && j < i; j++)
            if (strcmp(rs->r[j].id, rs->r[i].id) == 0)
                st = sl_yaml_error(&y, item, err, "reading '%s': the id is used twice in the file",
                                   rs->r[i].id);
    }
    sl_yaml_free(&y);
    if (st != SL_OK) {
        sl_readings_free(rs);
        return st;
    }
    *out = rs;
    return SL_OK;
}
