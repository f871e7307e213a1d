/*
 * Measurement sets and profile CSV files (see include/strayline/measure.h).
 *
 * The CSV is parsed by libcsv; this file only decides what the fields mean.
 * Every row must hold exactly the header's two columns, every value must be
 * a finite number, positions must increase strictly: a profile that breaks
 * any of these is refused with its file and line, never silently trimmed.
 */
#include "strayline/measure.h"
#include "strayline/yamlio.h"

#include <csv.h>
#include <libgen.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#define MAX_CSV_BYTES ((size_t)16 << 20)
#define MAX_ROWS 200000

void sl_profile_data_free(sl_profile_data *p)
{
    free(p->applicator);
    free(p->insert);
    free(p->direction);
    free(p->file);
    free(p->path);
    free(p->distance_cm);
    free(p->dose_percent);
    free(p->sigma_percent);
    memset(p, 0, sizeof *p);
}

void sl_measurements_free(sl_measurement_set *m)
{
    if (!m)
        return;
    free(m->source);
    sl_machine_free(&m->machine);
    free(m->date);
    free(m->measured_by);
    free(m->detector);
    free(m->reference);
    for (size_t i = 0; i < m->nprofiles; i++)
        sl_profile_data_free(&m->profiles[i]);
    free(m->profiles);
    sl_notes_free(&m->notes);
    free(m);
}

/* ------------------------------------------------------------ CSV -- */

typedef struct csv_rows {
    size_t nrows, cap;
    size_t ncols_row;   /* fields seen in the current row */
    char *head[2];      /* header names */
    double *a, *b;      /* the two columns */
    size_t header_cols;
    bool failed;
    sl_status st;
    char msg[256];
    size_t row;         /* 1-based record being read (the header is record 1) */
    size_t line;        /* file line being read, for messages */
    size_t *lines;      /* file line of each data row */
} csv_rows;

static void fail_row(csv_rows *r, sl_status st, const char *fmt, const char *field)
{
    if (r->failed)
        return;
    r->failed = true;
    r->st = st;
    snprintf(r->msg, sizeof r->msg, fmt, r->line, field ? field : "");
}

static void on_field(void *s, size_t len, void *ctx)
{
    csv_rows *r = ctx;
    if (r->failed)
        return;
    char buf[128];
    if (len >= sizeof buf) {
        fail_row(r, SL_EINPUT, "line %zu: a field is too long%s", NULL);
        return;
    }
    if (s)
        memcpy(buf, s, len);
    buf[s ? len : 0] = '\0';
    size_t col = r->ncols_row++;
    if (r->row == 1) {
        if (col >= 2) {
            fail_row(r, SL_EINPUT, "line %zu: more than two columns in the header ('%s')", buf);
            return;
        }
        r->head[col] = strdup(buf);
        if (!r->head[col])
            fail_row(r, SL_ENOMEM, "line %zu: out of memory%s", NULL);
        return;
    }
    if (col >= 2) {
        fail_row(r, SL_EINPUT, "line %zu: more than two values ('%s')", buf);
        return;
    }
    double v;
    if (!sl_parse_double(buf, &v)) {
        fail_row(r, SL_EINPUT, "line %zu: '%s' is not a finite number", buf);
        return;
    }
    if (col == 0) {
        if (r->nrows == r->cap) {
            if (r->cap >= MAX_ROWS) {
                fail_row(r, SL_EINPUT, "line %zu: more rows than strayline accepts%s", NULL);
                return;
            }
            size_t cap = r->cap ? r->cap * 2 : 64;
            double *na = realloc(r->a, cap * sizeof *na);
            if (na)
                r->a = na;
            double *nb = realloc(r->b, cap * sizeof *nb);
            if (nb)
                r->b = nb;
            size_t *nl = realloc(r->lines, cap * sizeof *nl);
            if (nl)
                r->lines = nl;
            if (!na || !nb || !nl) {
                fail_row(r, SL_ENOMEM, "line %zu: out of memory%s", NULL);
                return;
            }
            r->cap = cap;
        }
        r->a[r->nrows] = v;
        r->lines[r->nrows] = r->line;
    } else {
        r->b[r->nrows] = v;
    }
}

static void on_row(int c, void *ctx)
{
    (void)c;
    csv_rows *r = ctx;
    if (r->failed)
        return;
    if (r->row == 1) {
        r->header_cols = r->ncols_row;
        if (r->ncols_row != 2)
            fail_row(r, SL_EINPUT,
                     "line %zu: the header must name two columns: a distance and a dose%s", NULL);
    } else if (r->ncols_row != 2) {
        fail_row(r, SL_EINPUT, "line %zu: expected two values%s", NULL);
    } else {
        r->nrows++;
    }
    r->ncols_row = 0;
    r->row++;
}

sl_status sl_find_edges(const double *x, const double *d, size_t n, const char *what,
                        double *left, double *right, double *axis_out, sl_error *err)
{
    /* start from the point nearest the axis */
    size_t c = 0;
    for (size_t i = 1; i < n; i++) {
        if (fabs(x[i]) < fabs(x[c]))
            c = i;
    }
    if (!(fabs(x[c]) < 1.0))
        return sl_error_set(err, SL_EINPUT,
                            "%s: no point within 1 cm of the axis: not a profile through the "
                            "field",
                            what);
    /* the edge is where the dose falls to half its value on the axis at
     * this depth (the axis value from the points either side of x = 0) */
    double axis = d[c];
    if (c + 1 < n && x[c] < 0 && x[c + 1] > 0)
        axis = d[c] + (0 - x[c]) * (d[c + 1] - d[c]) / (x[c + 1] - x[c]);
    else if (c > 0 && x[c] > 0 && x[c - 1] < 0)
        axis = d[c - 1] + (0 - x[c - 1]) * (d[c] - d[c - 1]) / (x[c] - x[c - 1]);
    double half = 0.5 * axis;
    if (axis_out)
        *axis_out = axis;
    if (!(axis > 0))
        return sl_error_set(err, SL_EINPUT, "%s: no dose on the axis", what);
    *left = *right = NAN;
    for (size_t i = c; i > 0; i--) {
        if (d[i - 1] < half && d[i] >= half) {
            *left = x[i - 1] + (half - d[i - 1]) * (x[i] - x[i - 1]) / (d[i] - d[i - 1]);
            break;
        }
    }
    for (size_t i = c; i + 1 < n; i++) {
        if (d[i + 1] < half && d[i] >= half) {
            *right = x[i] + (d[i] - half) * (x[i + 1] - x[i]) / (d[i] - d[i + 1]);
            break;
        }
    }
    if (isnan(*left))
        return sl_error_set(err, SL_EINPUT, "%s: no 50 %% crossing on the negative side of the "
                                            "axis",
                            what);
    if (isnan(*right))
        return sl_error_set(err, SL_EINPUT, "%s: no 50 %% crossing on the positive side of the "
                                            "axis",
                            what);
    return SL_OK;
}

typedef struct dpair {
    double d, v;
    int side; /* of a through-field profile: -1 left, +1 right; 0 one-sided */
    bool drop;
} dpair;

static int cmp_dpair(const void *a, const void *b)
{
    double x = ((const dpair *)a)->d, y = ((const dpair *)b)->d;
    return x < y ? -1 : x > y;
}

/* The two sides of a through-field profile are seldom read at the same
 * distances from their edges (the edges fall between a scan's positions), so
 * the 0.5 mm merge below rarely meets a pair: a point is also compared with
 * the other side read between its two neighbours there (log-linear, as the
 * dose falls off exponentially; neighbours at most 1 cm, or half the
 * distance, apart), and where
 * that side is hotter by more than SL_SIDES_APART_SIGMAS standard
 * deviations of a difference the colder point is left out. Without it a
 * side 1.5 times hotter beyond 5 cm was fitted through both, 17 % low on
 * the hot side. pts sorted by distance; returns the points left out. */
#define SIDES_MAX_GAP_CM 1.0
typedef struct side_cut {
    int side;        /* the colder side cut short (-1 or +1); 0: none */
    size_t n;        /* its points left out beyond the other side's scan */
    double from_cm;  /* the other side's farthest distance */
} side_cut;

static size_t drop_colder_side(dpair *pts, size_t np, double rel, double floor_percent,
                               side_cut *cut)
{
    *cut = (side_cut){0, 0, NAN};
    size_t n = 0;
    for (size_t i = 0; i < np; i++) {
        pts[i].drop = false;
        const dpair *lo = NULL, *hi = NULL;
        for (size_t k = i; k-- > 0 && !lo;)
            if (pts[k].side == -pts[i].side)
                lo = &pts[k];
        for (size_t k = i + 1; k < np && !hi; k++)
            if (pts[k].side == -pts[i].side)
                hi = &pts[k];
        /* neighbours at most 1 cm apart near the field, half the distance
         * farther out, where the fall-off is slow and scans
         * coarse (found by an independent review: 2 cm steps beyond 10 cm
         * were fitted through both sides) */
        double gap = fmax(SIDES_MAX_GAP_CM, 0.5 * pts[i].d);
        if (!lo != !hi) {
            /* beyond the other side's last point (or before its first):
             * its last two carried on log-linearly, within the same reach.
             * Beyond the applicator-scatter peak the fall-off flattens with
             * distance, so the line reads that side lower than it is and
             * a point is not left out for a bend of the curve; carried
             * back toward the edge across the peak it may read high and
             * leave a near point out, which only raises the fit there
             * (found by an independent review: a cold
             * side's last point, past the hot side's scan, pulled the fit
             * 11 % low at 21 cm) */
            const dpair *near = lo ? lo : hi, *next = NULL;
            if (lo) {
                for (size_t k = (size_t)(lo - pts); k-- > 0 && !next;)
                    if (pts[k].side == lo->side && pts[k].d < lo->d)
                        next = &pts[k];
            } else {
                for (size_t k = (size_t)(hi - pts) + 1; k < np && !next; k++)
                    if (pts[k].side == hi->side && pts[k].d > hi->d)
                        next = &pts[k];
            }
            if (!next || fabs(pts[i].d - near->d) > gap || fabs(near->d - next->d) > gap)
                continue;
            /* the line through the two, in order of distance */
            hi = lo ? lo : next;
            lo = lo ? next : near;
        } else if (!lo || hi->d - lo->d > gap) {
            continue;
        }
        double t = hi->d > lo->d ? (pts[i].d - lo->d) / (hi->d - lo->d) : 0;
        double u = exp(log(lo->v) + t * (log(hi->v) - log(lo->v)));
        double m = 0.5 * (u + pts[i].v), r = rel * m;
        double sigma = sqrt(r * r + floor_percent * floor_percent);
        if (u - pts[i].v > SL_SIDES_APART_SIGMAS * M_SQRT2 * sigma) {
            pts[i].drop = true;
            n++;
        }
    }
    /* A side found colder is not the only word where the hotter was not
     * read: its points beyond the other side's scan are left out too, so
     * that the profile ends where the hotter side ends and farther out the
     * model holds its farthest level [extrapolated]. Kept, they bent the
     * fit toward the colder side: 27 % low at 10 cm on a side 1.5 times
     * hotter scanned to 7 cm (its fall-off carried on reads low, so a
     * comparison there passes them). */
    for (int side = -1; side <= 1; side += 2) {
        bool colder = false;
        double other_last = -INFINITY;
        for (size_t i = 0; i < np; i++) {
            colder = colder || (pts[i].side == side && pts[i].drop);
            if (pts[i].side == -side)
                other_last = fmax(other_last, pts[i].d);
        }
        for (size_t i = 0; colder && i < np; i++)
            if (pts[i].side == side && !pts[i].drop && pts[i].d > other_last) {
                pts[i].drop = true;
                cut->side = side;
                cut->n++;
                cut->from_cm = other_last;
            }
    }
    return n;
}

sl_status sl_profile_parse_csv(const char *data, size_t size, const char *name,
                               double cax_reading, double nominal_width_cm, sl_profile_data *p,
                               sl_notes *notes, sl_error *err)
{
    /* a UTF-8 byte-order mark, as spreadsheets write one, is not data */
    if (size >= 3 && memcmp(data, "\xEF\xBB\xBF", 3) == 0) {
        data += 3;
        size -= 3;
    }
    /* a NUL would end a field early inside the parser's callbacks */
    const char *nul = memchr(data, 0, size);
    if (nul) {
        size_t line = 1;
        for (const char *q = data; q < nul; q++)
            line += *q == '\n';
        return sl_error_set(err, SL_EINPUT, "%s: line %zu: a NUL byte: not a CSV text file", name,
                            line);
    }
    struct csv_parser parser;
    if (csv_init(&parser, CSV_STRICT | CSV_STRICT_FINI | CSV_APPEND_NULL | CSV_EMPTY_IS_NULL) != 0)
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    csv_rows r = {0};
    r.row = 1;
    /* a line at a time, so that messages name the file's line (a record
     * may span lines inside quotes, and blank lines hold no record) */
    for (size_t at = 0; at < size && !r.failed;) {
        const char *nl = memchr(data + at, '\n', size - at);
        size_t len = nl ? (size_t)(nl - (data + at)) + 1 : size - at;
        r.line++;
        if (csv_parse(&parser, data + at, len, on_field, on_row, &r) != len && !r.failed) {
            r.failed = true;
            r.st = SL_EINPUT;
            snprintf(r.msg, sizeof r.msg, "line %zu: CSV error: %s", r.line,
                     csv_strerror(csv_error(&parser)));
        }
        at += len;
    }
    if (!r.failed && csv_fini(&parser, on_field, on_row, &r) != 0) {
        r.failed = true;
        r.st = SL_EINPUT;
        snprintf(r.msg, sizeof r.msg, "line %zu: CSV error: %s", r.line,
                 csv_strerror(csv_error(&parser)));
    }
    csv_free(&parser);
    sl_status st = SL_OK;
    if (r.failed)
        st = sl_error_set(err, r.st, "%s: %s", name, r.msg);
    else if (r.row == 1)
        st = sl_error_set(err, SL_EINPUT, "%s: empty file, no header", name);
    bool positions = false, readings = false;
    if (st == SL_OK) {
        if (strcmp(r.head[0], "off_axis_cm") == 0)
            positions = true;
        else if (strcmp(r.head[0], "edge_distance_cm") != 0)
            st = sl_error_set(err, SL_EINPUT,
                              "%s: row 1: first column '%s': expected edge_distance_cm or "
                              "off_axis_cm",
                              name, r.head[0]);
    }
    if (st == SL_OK) {
        if (strcmp(r.head[1], "reading") == 0)
            readings = true;
        else if (strcmp(r.head[1], "dose_percent") != 0)
            st = sl_error_set(err, SL_EINPUT,
                              "%s: row 1: second column '%s': expected dose_percent or reading",
                              name, r.head[1]);
    }
    if (st == SL_OK && readings && isnan(cax_reading))
        st = sl_error_set(err, SL_EINPUT,
                          "%s: the CSV holds raw readings but the measurement set gives no "
                          "cax_reading for this profile",
                          name);
    if (st == SL_OK && !readings && !isnan(cax_reading))
        st = sl_error_set(err, SL_EINPUT,
                          "%s: the CSV holds dose_percent, yet the measurement set gives a "
                          "cax_reading: say which",
                          name);
    if (st == SL_OK && r.nrows < SL_PROFILE_MIN_POINTS)
        st = sl_error_set(err, SL_EINPUT, "%s: %zu data rows; a profile needs at least %d", name,
                          r.nrows, SL_PROFILE_MIN_POINTS);
    for (size_t i = 1; st == SL_OK && i < r.nrows; i++) {
        if (!(r.a[i] > r.a[i - 1]))
            st = sl_error_set(err, SL_EINPUT,
                              "%s: line %zu: %s %g does not increase on the row before (%g)",
                              name, r.lines[i], r.head[0], r.a[i], r.a[i - 1]);
    }
    if (st == SL_OK && readings) {
        for (size_t i = 0; i < r.nrows; i++)
            r.b[i] *= 100.0 / cax_reading;
    }
    for (size_t i = 0; st == SL_OK && i < r.nrows; i++) {
        if (r.b[i] < 0 || r.b[i] > 150)
            st = sl_error_set(err, SL_EINPUT,
                              "%s: line %zu: dose %g %% of the central-axis maximum is not "
                              "plausible",
                              name, r.lines[i], r.b[i]);
    }
    double left = NAN, right = NAN;
    if (st == SL_OK && positions)
        st = sl_find_edges(r.a, r.b, r.nrows, name, &left, &right, &p->axis_percent, err);
    dpair *pts = NULL;
    size_t np = 0;
    if (st == SL_OK) {
        pts = malloc(r.nrows * sizeof *pts);
        if (!pts)
            st = sl_error_set(err, SL_ENOMEM, "out of memory");
    }
    size_t dropped = 0;
    for (size_t i = 0; st == SL_OK && i < r.nrows; i++) {
        int side = positions ? (r.a[i] > right ? 1 : -1) : 0;
        double d = positions ? (r.a[i] > right ? r.a[i] - right
                                : r.a[i] < left ? left - r.a[i]
                                                : -1)
                             : r.a[i];
        /* a tilted through-field profile keeps one side (the mirror rule) */
        if (positions && ((p->side > 0 && r.a[i] < right) || (p->side < 0 && r.a[i] > left)))
            d = -1;
        if (d < 0) {
            dropped++;
            continue;
        }
        if (!(r.b[i] > 0)) {
            st = sl_error_set(err, SL_EINPUT,
                              "%s: line %zu: a dose of 0 outside the field cannot be fitted; give "
                              "the reading at the noise floor",
                              name, r.lines[i]);
            break;
        }
        pts[np++] = (dpair){d, r.b[i], side, false};
    }
    if (st == SL_OK && np < SL_PROFILE_MIN_POINTS)
        st = sl_error_set(err, SL_EINPUT, "%s: %zu points lie outside the field; at least %d are "
                                          "needed",
                          name, np, SL_PROFILE_MIN_POINTS);
    if (st == SL_OK) {
        if (positions) {
            /* both sides merged: sort by distance, and average points
             * closer than 0.5 mm so that the distances increase strictly;
             * where they differ by more than three standard deviations of
             * a difference, one side is hotter than the other, and the
             * hotter is kept (an organ may lie on either side) */
            qsort(pts, np, sizeof *pts, cmp_dpair);
            size_t m = 0, hot = 0;
            side_cut cut = {0, 0, NAN};
            if (p->side == 0) {
                hot = drop_colder_side(pts, np, p->rel_uncertainty, p->floor_percent, &cut);
                for (size_t i = 0; i < np; i++)
                    if (!pts[i].drop)
                        pts[m++] = pts[i];
                np = m;
                m = 0;
            }
            for (size_t i = 0; i < np;) {
                size_t j = i;
                double sd = 0, sv = 0, lo = INFINITY, hi = -INFINITY;
                while (j < np && pts[j].d - pts[i].d < 0.05) {
                    sd += pts[j].d;
                    sv += pts[j].v;
                    lo = fmin(lo, pts[j].v);
                    hi = fmax(hi, pts[j].v);
                    j++;
                }
                double v = sv / (double)(j - i), rel = p->rel_uncertainty * v;
                double sigma = sqrt(rel * rel + p->floor_percent * p->floor_percent);
                if (j - i > 1 && hi - lo > SL_SIDES_APART_SIGMAS * M_SQRT2 * sigma) {
                    v = hi;
                    hot++;
                }
                pts[m++] = (dpair){sd / (double)(j - i), v, 0, false};
                i = j;
            }
            np = m;
            if (hot && notes)
                sl_notes_add(notes,
                             "%s: at %zu distances the two sides differ by more than %.0f "
                             "standard deviations of a difference; the hotter side is kept there",
                             name, hot, SL_SIDES_APART_SIGMAS);
            if (cut.n && notes)
                sl_notes_add(notes,
                             "%s: the %s side reads colder where both sides were read; its %zu "
                             "point%s beyond %.2f cm from the edge, where the other side was not "
                             "scanned, %s left out: the profile ends at %.2f cm and the model "
                             "holds its farthest level beyond [extrapolated]; scan the other "
                             "side farther",
                             name, cut.side < 0 ? "negative" : "positive", cut.n,
                             cut.n == 1 ? "" : "s", cut.from_cm, cut.n == 1 ? "is" : "are",
                             cut.from_cm);
            p->width_found_cm = right - left;
            p->width_nominal_cm = nominal_width_cm;
            if (isfinite(nominal_width_cm) &&
                fabs(p->width_found_cm - nominal_width_cm) > SL_EDGE_WIDTH_WARN_CM && notes)
                sl_notes_add(notes,
                             "%s: the 50 %% width found is %.2f cm, the nominal field at this "
                             "depth is %.2f cm (more than %.1f cm apart)",
                             name, p->width_found_cm, nominal_width_cm, SL_EDGE_WIDTH_WARN_CM);
        } else {
            p->width_found_cm = p->width_nominal_cm = p->axis_percent = NAN;
            if (dropped && notes && !positions)
                sl_notes_add(notes, "%s: %zu rows inside the field (negative distance) ignored",
                             name, dropped);
        }
        p->from_positions = positions;
        p->n = np;
        p->distance_cm = malloc(np * sizeof *p->distance_cm);
        p->dose_percent = malloc(np * sizeof *p->dose_percent);
        p->sigma_percent = malloc(np * sizeof *p->sigma_percent);
        if (!p->distance_cm || !p->dose_percent || !p->sigma_percent)
            st = sl_error_set(err, SL_ENOMEM, "out of memory");
        for (size_t i = 0; st == SL_OK && i < np; i++) {
            p->distance_cm[i] = pts[i].d;
            p->dose_percent[i] = pts[i].v;
            double rel = p->rel_uncertainty * pts[i].v;
            p->sigma_percent[i] = sqrt(rel * rel + p->floor_percent * p->floor_percent);
        }
    }
    free(pts);
    free(r.a);
    free(r.b);
    free(r.lines);
    free(r.head[0]);
    free(r.head[1]);
    return st;
}

sl_status sl_profile_read_csv(const char *path, double cax_reading, double nominal_width_cm,
                              sl_profile_data *p, sl_notes *notes, sl_error *err)
{
    char *data;
    size_t size;
    sl_status st = sl_read_file(path, MAX_CSV_BYTES, &data, &size, err);
    if (st != SL_OK)
        return st;
    sl_sha256_buffer(data, size, p->sha256);
    st = sl_profile_parse_csv(data, size, path, cax_reading, nominal_width_cm, p, notes, err);
    free(data);
    return st;
}

/* ---------------------------------------------------- measurement set -- */

/* The profile's entry (the k-th of the set) into m->profiles[slot]. */
static sl_status read_profile(sl_yaml *y, yaml_node_t *n, size_t k, size_t slot,
                              sl_measurement_set *m, double *cax_out, sl_error *err)
{
    char what[64];
    snprintf(what, sizeof what, "profile %zu", k + 1);
    sl_profile_data *p = &m->profiles[slot];
    p->line = n ? n->start_mark.line + 1 : 0;
    p->entry = k + 1;
    sl_yaml_field f[] = {{"energy_mev", true, NULL}, {"applicator", true, NULL},
                         {"insert", true, NULL},     {"depth_cm", true, NULL},
                         {"direction", true, NULL},  {"file", true, NULL},
                         {"uncertainty", true, NULL}, {"cax_reading", false, NULL},
                         {"tilt_deg", false, NULL},   {"ssd_cm", false, NULL}};
    sl_status st = sl_yaml_fields(y, n, what, f, 10, err);
    if (st == SL_OK)
        st = sl_yaml_number_in(y, f[0].node, "energy_mev", 1, 50, &p->energy_mev, err);
    if (st == SL_OK)
        st = sl_yaml_string(y, f[1].node, what, &p->applicator, err);
    const sl_applicator_spec *app = NULL;
    if (st == SL_OK && !(app = sl_machine_applicator(&m->machine, p->applicator)))
        st = sl_yaml_error(y, f[1].node, err, "%s: applicator '%s' is not in the list", what,
                           p->applicator);
    if (st == SL_OK && !sl_machine_output(&m->machine, p->energy_mev, p->applicator))
        st = sl_yaml_error(y, n, err, "%s: no output is given for %g MeV, applicator '%s'", what,
                           p->energy_mev, p->applicator);
    if (st == SL_OK)
        st = sl_yaml_string(y, f[2].node, what, &p->insert, err);
    const sl_insert_spec *ins = NULL;
    if (st == SL_OK && strcmp(p->insert, SL_INSERT_OPEN) != 0 &&
        !(ins = sl_machine_insert(&m->machine, p->applicator, p->insert)))
        st = sl_yaml_error(y, f[2].node, err, "%s: insert '%s' is not listed for applicator '%s'",
                           what, p->insert, p->applicator);
    if (st == SL_OK)
        st = sl_yaml_number_in(y, f[3].node, "depth_cm", 0, 10, &p->depth_cm, err);
    if (st == SL_OK)
        st = sl_yaml_string(y, f[4].node, what, &p->direction, err);
    if (st == SL_OK && strcmp(p->direction, "crossplane") && strcmp(p->direction, "inplane") &&
        strcmp(p->direction, "diagonal"))
        st = sl_yaml_error(y, f[4].node, err,
                           "%s: direction '%s' (crossplane, inplane or diagonal)", what,
                           p->direction);
    if (st == SL_OK)
        st = sl_yaml_string(y, f[5].node, what, &p->file, err);
    if (st == SL_OK) {
        sl_yaml_field u[] = {{"relative", true, NULL}, {"floor_percent", true, NULL}};
        st = sl_yaml_fields(y, f[6].node, "uncertainty", u, 2, err);
        if (st == SL_OK)
            st = sl_yaml_number_in(y, u[0].node, "uncertainty relative", 0.001, 1,
                                   &p->rel_uncertainty, err);
        if (st == SL_OK)
            st = sl_yaml_number_in(y, u[1].node, "uncertainty floor_percent", 0, 10,
                                   &p->floor_percent, err);
    }
    double cax = NAN;
    if (st == SL_OK && f[7].node)
        st = sl_yaml_number_in(y, f[7].node, "cax_reading", 1e-12, 1e12, &cax, err);
    p->tilt_deg = 0;
    p->ssd_cm = m->machine.nominal_ssd_cm;
    if (st == SL_OK && f[8].node)
        st = sl_yaml_number_in(y, f[8].node, "tilt_deg", -SL_TILT_MAX_DEG, SL_TILT_MAX_DEG,
                               &p->tilt_deg, err);
    if (st == SL_OK && f[9].node)
        st = sl_yaml_number_in(y, f[9].node, "ssd_cm",
                               m->machine.nominal_ssd_cm - SL_MEAS_SSD_SHORT_CM,
                               m->machine.nominal_ssd_cm + SL_MEAS_SSD_LONG_CM, &p->ssd_cm, err);
    if (st == SL_OK && !sl_machine_output_at(&m->machine, p->energy_mev, p->applicator,
                                             p->ssd_cm, SL_SSD_MATCH_CM) &&
        fabs(p->ssd_cm - m->machine.nominal_ssd_cm) > SL_SSD_MATCH_CM && m->notes.count < 1000)
        sl_notes_add(&m->notes,
                     "%s: %s: no output is given at SSD %g cm: the nominal output with the "
                     "inverse square applies there",
                     m->source, what, p->ssd_cm);
    *cax_out = cax;
    if (st != SL_OK)
        return st;
    /* the side kept: a tilted profile given by positions splits in two (the
     * caller makes the mirrored twin); by edge distance it is one side */
    p->side = p->tilt_deg != 0 ? 1 : 0;
    return SL_OK;
}

static bool same_profile(const sl_profile_data *q, const sl_profile_data *p)
{
    return fabs(q->energy_mev - p->energy_mev) < 0.01 && strcmp(q->applicator, p->applicator) == 0 &&
           strcmp(q->insert, p->insert) == 0 && fabs(q->depth_cm - p->depth_cm) < 1e-6 &&
           strcmp(q->direction, p->direction) == 0 && fabs(q->tilt_deg - p->tilt_deg) < 1e-6 &&
           fabs(q->ssd_cm - p->ssd_cm) < 1e-6;
}

/* The profile's data: the duplicate check, the nominal width, the CSV. */
static sl_status read_profile_data(sl_yaml *y, yaml_node_t *n, size_t k, const char *what,
                                   const char *dir, double cax, sl_measurement_set *m,
                                   sl_error *err)
{
    sl_profile_data *p = &m->profiles[k];
    sl_status st = SL_OK;
    for (size_t j = 0; st == SL_OK && j < k; j++) {
        const sl_profile_data *q = &m->profiles[j];
        if (same_profile(q, p))
            st = sl_yaml_error(y, n, err, "%s: duplicate of profile %zu (same energy, "
                                          "applicator, insert, depth, direction, tilt and "
                                          "SSD%s)",
                               what, q->entry, q->side || p->side ? ", the mirror rule counted" : "");
    }
    if (st != SL_OK)
        return st;
    const sl_applicator_spec *app = sl_machine_applicator(&m->machine, p->applicator);
    const sl_insert_spec *ins = strcmp(p->insert, SL_INSERT_OPEN) != 0
                                    ? sl_machine_insert(&m->machine, p->applicator, p->insert)
                                    : NULL;
    /* the nominal width along the measured axis, at the measurement depth */
    double w = strcmp(p->direction, "inplane") == 0 ? (ins ? ins->y_cm : app->y_cm)
                                                    : (ins ? ins->x_cm : app->x_cm);
    if (strcmp(p->direction, "diagonal") == 0)
        w = NAN;
    w *= (p->ssd_cm + p->depth_cm) / m->machine.nominal_ssd_cm;
    char path[4096];
    if (p->file[0] == '/')
        snprintf(path, sizeof path, "%s", p->file);
    else
        snprintf(path, sizeof path, "%s/%s", dir, p->file);
    bool ok = true;
    p->path = sl_strdup(path, &ok);
    if (!ok)
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    sl_status st2 = sl_profile_read_csv(path, cax, w, p, &m->notes, err);
    if (st2 != SL_OK)
        return st2;
    if (p->n > 0 && p->distance_cm[0] > SL_EDGE_FAR_START_CM)
        sl_notes_add(&m->notes,
                     "%s: the first point lies %.2f cm from the field edge: nearer organs will "
                     "rest on the extrapolation toward the edge (marked extrapolated); measure "
                     "from the edge",
                     path, p->distance_cm[0]);
    /* a dose in another unit or against another reference: every organ
     * would read low by the same factor, with nothing else to show it */
    const sl_output_spec *o = sl_machine_output(&m->machine, p->energy_mev, p->applicator);
    if (!o || p->depth_cm > o->dmax_cm)
        return SL_OK;
    /* an insert's profiles relative to the open field's maximum carry its
     * cutout factor too (a small cutout's can be 0.7 or less): half the
     * least levels then */
    double lower = ins && ins->relative_to == SL_REL_OPEN_CAX ? 0.5 : 1.0;
    /* a width far from the nominal one: another applicator or insert than
     * the one named, or a wrong pixel size; either puts the profile's
     * distances, and so every organ's dose, somewhere else */
    /* a tilted beam's footprint widens (by about 1 / cos tilt, more with the
     * obliquity's own scatter): there the note alone */
    if (p->from_positions && p->tilt_deg == 0 && isfinite(p->width_nominal_cm) &&
        fabs(p->width_found_cm - p->width_nominal_cm) >
            fmax(SL_EDGE_WIDTH_REFUSE_CM, SL_EDGE_WIDTH_REFUSE_REL * p->width_nominal_cm))
        return sl_error_set(err, SL_EINPUT,
                            "%s: the 50 %% width found is %.2f cm, the nominal field of "
                            "applicator '%s'%s%s at depth %g cm is %.2f cm: more than %.0f cm "
                            "and %.0f %% apart (another applicator or insert, or a wrong pixel "
                            "size?)",
                            path, p->width_found_cm, p->applicator,
                            strcmp(p->insert, SL_INSERT_OPEN) ? ", insert " : "",
                            strcmp(p->insert, SL_INSERT_OPEN) ? p->insert : "", p->depth_cm,
                            p->width_nominal_cm, SL_EDGE_WIDTH_REFUSE_CM,
                            100 * SL_EDGE_WIDTH_REFUSE_REL);
    if (p->from_positions && !(p->axis_percent >= lower * SL_AXIS_MIN_PERCENT))
        return sl_error_set(err, SL_EINPUT,
                            "%s: the dose on the axis reads %g %% at depth %g cm, no deeper "
                            "than the depth of maximum (%g cm): a profile is in percent of the "
                            "central-axis maximum, and this one reads below %.0f %% (a fraction, "
                            "another unit or another reference dose?)",
                            path, p->axis_percent, p->depth_cm, o->dmax_cm,
                            lower * SL_AXIS_MIN_PERCENT);
    if (!p->from_positions && p->n > 0 && p->distance_cm[0] <= SL_EDGE_START_CM &&
        !(p->dose_percent[0] >= lower * SL_EDGE_MIN_PERCENT))
        return sl_error_set(err, SL_EINPUT,
                            "%s: the dose %g cm from the field edge reads %g %% at depth %g cm, "
                            "no deeper than the depth of maximum (%g cm): a profile is in "
                            "percent of the central-axis maximum, and at the edge it reads "
                            "below %.0f %% (a fraction, another unit or another reference dose?)",
                            path, p->distance_cm[0], p->dose_percent[0], p->depth_cm,
                            o->dmax_cm, lower * SL_EDGE_MIN_PERCENT);
    return SL_OK;
}

/* A profile's dose at distance x (cm) by log-linear interpolation of its
 * points; NAN outside them. */
static double dose_at(const sl_profile_data *p, double x)
{
    for (size_t i = 1; i < p->n; i++)
        if (x >= p->distance_cm[i - 1] && x <= p->distance_cm[i]) {
            double w = (x - p->distance_cm[i - 1]) / (p->distance_cm[i] - p->distance_cm[i - 1]);
            return p->dose_percent[i - 1] * exp(w * log(p->dose_percent[i] /
                                                        p->dose_percent[i - 1]));
        }
    return NAN;
}

/* The median of x[0..k) (sorted in place; k > 0), for an even count the
 * mean of the middle two: of logarithms, the geometric mean of ratios. */
static double median_sorted(double *x, size_t k)
{
    for (size_t a = 1; a < k; a++)
        for (size_t b = a; b > 0 && x[b] < x[b - 1]; b--) {
            double t = x[b];
            x[b] = x[b - 1];
            x[b - 1] = t;
        }
    return k % 2 ? x[k / 2] : 0.5 * (x[k / 2 - 1] + x[k / 2]);
}

/* Whether a profile lies deeper than the depth of maximum of its energy
 * and applicator (unknown: taken as deeper, the wider tolerance). */
static bool deeper_than_max(const sl_measurement_set *m, const sl_profile_data *p)
{
    const sl_output_spec *o = sl_machine_output(&m->machine, p->energy_mev, p->applicator);
    return !o || p->depth_cm > o->dmax_cm;
}

/* The profiles of one energy, applicator and insert read alike far from
 * the field, where head leakage and scatter dominate and depth, direction,
 * tilt and SSD change the dose by a factor of two or so. One that reads
 * SL_LEVELS_APART times lower or higher than the median of the others is
 * in another unit or against another reference dose (the checks at the
 * axis and the edge see only profiles no deeper than the maximum that
 * start there). Two profiles are compared at the farthest distance both
 * reach, up to SL_LEVELS_AT_CM, and never before either's first point, so
 * that a tail scanned alone from 12 cm is compared too. At every depth: a
 * profile deeper than the maximum in fractions read 100 times low at every
 * deep organ (found by an independent review). But beyond the electrons'
 * range only the photons remain, a few times below the scattered
 * electrons a few centimetres out: a pair with a profile deeper than the
 * maximum compared nearer than SL_LEVELS_AT_CM is held to
 * SL_LEVELS_APART_DEEP, which still finds a fraction for a percent, and
 * counts only for a profile that has no other pair. Two
 * profiles alone (along one direction) are compared with each other, and
 * the message says either may be the one; a profile compared with none,
 * deeper than the maximum or starting beyond the edge rule, is a warning
 * (nothing could check its unit). */
static sl_status check_levels_agree(sl_measurement_set *m, const char *name, sl_error *err)
{
    size_t n = m->nprofiles;
    /* per pair, the ratio's logarithm: pairs held to SL_LEVELS_APART in v,
     * those held to SL_LEVELS_APART_DEEP in w */
    double *v = malloc((n ? n : 1) * sizeof *v), *w = malloc((n ? n : 1) * sizeof *w);
    if (!v || !w) {
        free(v);
        free(w);
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    }
    sl_status st = SL_OK;
    for (size_t i = 0; st == SL_OK && i < n; i++) {
        const sl_profile_data *p = &m->profiles[i];
        if (p->n < 2)
            continue;
        size_t k = 0, kv = 0, kw = 0;
        bool same_direction = true; /* of the others */
        bool p_deep = deeper_than_max(m, p);
        for (size_t j = 0; j < n; j++) {
            const sl_profile_data *q = &m->profiles[j];
            if (j == i || q->n < 2 || q->entry == p->entry ||
                fabs(q->energy_mev - p->energy_mev) > 0.01 ||
                strcmp(q->applicator, p->applicator) != 0 || strcmp(q->insert, p->insert) != 0)
                continue;
            double reach = fmin(p->distance_cm[p->n - 1], q->distance_cm[q->n - 1]);
            double x = fmax(fmin(SL_LEVELS_AT_CM, reach),
                            fmax(p->distance_cm[0], q->distance_cm[0]));
            if (x > reach)
                continue; /* no distance in common */
            double a = dose_at(p, x), b = dose_at(q, x);
            if (isfinite(a) && isfinite(b) && a > 0 && b > 0) {
                bool pair_wide = (p_deep || deeper_than_max(m, q)) && x < SL_LEVELS_AT_CM;
                if (pair_wide)
                    w[kw++] = log(a / b);
                else
                    v[kv++] = log(a / b);
                k++;
                same_direction = same_direction && p->direction && q->direction &&
                                 strcmp(p->direction, q->direction) == 0;
            }
        }
        /* a pair alone only along one direction: a diagonal's distance from
         * a square field's corner reads far lower than a side's nearby */
        if (k == 0 || (k == 1 && !same_direction)) {
            if (p_deep || p->distance_cm[0] > SL_EDGE_START_CM)
                sl_notes_add(&m->notes,
                             "%s: profile %zu (%s) could not be compared with another profile "
                             "of %g MeV, applicator '%s', insert '%s' at a distance both reach: "
                             "nothing checked that it is in percent of the central-axis "
                             "maximum; check its unit and reference",
                             name, p->entry, p->path ? p->path : p->file, p->energy_mev,
                             p->applicator, p->insert);
            continue;
        }
        /* the median of the pairs held to the narrow tolerance, and of the
         * wide ones only when there are no others: deep pairs must not widen
         * the rest (found by independent reviews: a profile ten times low
         * passed beside one short deep profile, and beside three once each
         * pair had its own tolerance in one median) */
        bool narrow = kv > 0;
        double med = exp(narrow ? median_sorted(v, kv) : median_sorted(w, kw));
        double apart = narrow ? SL_LEVELS_APART : SL_LEVELS_APART_DEEP;
        size_t kk = narrow ? kv : kw;
        if (med < 1 / apart || med > apart)
            st = sl_error_set(err, SL_EINPUT,
                              "%s: profile %zu (%s) reads %.3g times the other profile%s of "
                              "%g MeV, applicator '%s', insert '%s' far from the field (median "
                              "of %zu, at up to %g cm; more than %g times apart%s): another "
                              "unit or another reference dose?%s",
                              name, p->entry, p->path ? p->path : p->file, med,
                              kk == 1 ? "" : "s", p->energy_mev, p->applicator, p->insert, kk,
                              SL_LEVELS_AT_CM, apart,
                              narrow ? ""
                                     : ", for pairs with a profile deeper than the maximum "
                                       "compared nearer than 10 cm",
                              k == 1 ? " (of two profiles either may be the one)" : "");
    }
    free(v);
    free(w);
    return st;
}

sl_status sl_measurements_load_buffer(const char *data, size_t size, const char *name,
                                      const char *dir, sl_measurement_set **out, sl_error *err)
{
    *out = NULL;
    sl_measurement_set *m = calloc(1, sizeof *m);
    if (!m)
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    bool ok = true;
    m->source = sl_strdup(name, &ok);
    sl_sha256_buffer(data, size, m->sha256);
    sl_yaml y;
    sl_status st = ok ? sl_yaml_load_buffer(&y, data, size, name, err) : SL_ENOMEM;
    if (st != SL_OK) {
        sl_measurements_free(m);
        return st;
    }
    sl_yaml_field f[] = {{"format", true, NULL},       {"format_version", true, NULL},
                         {"notice", false, NULL},      {"machine", true, NULL},
                         {"measured", true, NULL},     {"reference", true, NULL},
                         {"applicators", true, NULL},  {"inserts", false, NULL},
                         {"outputs", true, NULL},      {"profiles", true, NULL}};
    /* the other way round: a model file (SL_MODEL_FORMAT of model.h, a later
     * stage) handed to fit */
    yaml_node_t *root = sl_yaml_root(&y);
    for (yaml_node_pair_t *p = root && root->type == YAML_MAPPING_NODE
                                   ? root->data.mapping.pairs.start
                                   : NULL;
         p && p < root->data.mapping.pairs.top; p++) {
        yaml_node_t *k = yaml_document_get_node(&y.doc, p->key);
        yaml_node_t *v = yaml_document_get_node(&y.doc, p->value);
        if (k && v && k->type == YAML_SCALAR_NODE && v->type == YAML_SCALAR_NODE &&
            strcmp((const char *)k->data.scalar.value, "format") == 0 &&
            strcmp((const char *)v->data.scalar.value, "strayline-model") == 0) {
            st = sl_error_set(err, SL_EINPUT,
                              "%s: format: this is a model file, not a measurement set: give it "
                              "to `strayline estimate --model` or `strayline model show`",
                              name);
            sl_yaml_free(&y);
            sl_measurements_free(m);
            return st;
        }
    }
    st = sl_yaml_fields(&y, sl_yaml_root(&y), "measurement set", f, 10, err);
    char *format = NULL;
    if (st == SL_OK)
        st = sl_yaml_string(&y, f[0].node, "format", &format, err);
    if (st == SL_OK && strcmp(format, "strayline-measurements") != 0)
        st = sl_yaml_error(&y, f[0].node, err,
                           "format '%s': this is not a strayline measurement set", format);
    free(format);
    int version = 0;
    if (st == SL_OK)
        st = sl_yaml_int(&y, f[1].node, "format_version", &version, err);
    if (st == SL_OK && version != 1 && version != 2)
        st = sl_yaml_error(&y, f[1].node, err,
                           "format_version %d: only versions 1 and 2 are known", version);
    if (st == SL_OK)
        st = sl_machine_read(&y, f[3].node, f[6].node, f[7].node, f[8].node, &m->machine, err);
    if (st == SL_OK) {
        sl_yaml_field mf[] = {{"date", true, NULL}, {"by", true, NULL}, {"detector", true, NULL}};
        st = sl_yaml_fields(&y, f[4].node, "measured", mf, 3, err);
        if (st == SL_OK)
            st = sl_yaml_string(&y, mf[0].node, "measured date", &m->date, err);
        if (st == SL_OK)
            st = sl_yaml_string(&y, mf[1].node, "measured by", &m->measured_by, err);
        if (st == SL_OK)
            st = sl_yaml_string(&y, mf[2].node, "detector", &m->detector, err);
    }
    if (st == SL_OK)
        st = sl_yaml_string(&y, f[5].node, "reference", &m->reference, err);
    yaml_node_item_t *items = NULL;
    size_t n = 0;
    if (st == SL_OK)
        st = sl_yaml_seq(&y, f[9].node, "profiles", &items, &n, err);
    if (st == SL_OK && n == 0)
        st = sl_yaml_error(&y, f[9].node, err, "profiles: the list is empty");
    if (st == SL_OK) {
        m->profiles = calloc(2 * n, sizeof *m->profiles); /* room for mirrored twins */
        if (!m->profiles)
            st = sl_error_set(err, SL_ENOMEM, "out of memory");
    }
    for (size_t i = 0; st == SL_OK && i < n; i++) {
        yaml_node_t *node = sl_yaml_item(&y, items[i]);
        char what[64];
        snprintf(what, sizeof what, "profile %zu", i + 1);
        size_t slot = m->nprofiles++;
        double cax = NAN;
        st = read_profile(&y, node, i, slot, m, &cax, err);
        if (st == SL_OK)
            st = read_profile_data(&y, node, slot, what, dir, cax, m, err);
        sl_profile_data *p = &m->profiles[slot];
        if (st == SL_OK && p->side && !p->from_positions)
            p->side = 0; /* given by edge distance: the one side it describes */
        if (st == SL_OK && p->side) {
            /* the mirror rule: the negative side at the opposite tilt */
            sl_profile_data *q = &m->profiles[m->nprofiles++];
            bool ok = true;
            q->energy_mev = p->energy_mev;
            q->applicator = sl_strdup(p->applicator, &ok);
            q->insert = sl_strdup(p->insert, &ok);
            q->depth_cm = p->depth_cm;
            q->direction = sl_strdup(p->direction, &ok);
            q->file = sl_strdup(p->file, &ok);
            q->tilt_deg = -p->tilt_deg;
            q->ssd_cm = p->ssd_cm;
            q->side = -1;
            q->rel_uncertainty = p->rel_uncertainty;
            q->floor_percent = p->floor_percent;
            q->line = p->line;
            q->entry = p->entry;
            st = ok ? read_profile_data(&y, node, m->nprofiles - 1, what, dir, cax, m, err)
                    : sl_error_set(err, SL_ENOMEM, "out of memory");
        }
    }
    sl_yaml_free(&y);
    if (st == SL_OK)
        st = check_levels_agree(m, name, err);
    /* the same file under two entries (other than a mirrored twin): a copy
     * and paste that puts one depth's or applicator's data at another */
    for (size_t i = 0; st == SL_OK && i < m->nprofiles; i++)
        for (size_t j = 0; j < i; j++)
            if (m->profiles[i].entry != m->profiles[j].entry &&
                memcmp(m->profiles[i].sha256, m->profiles[j].sha256,
                       sizeof m->profiles[i].sha256) == 0) {
                sl_notes_add(&m->notes,
                             "%s: profiles %zu and %zu read files with the same content (%s and "
                             "%s): check that each entry names its own measurement",
                             name, m->profiles[j].entry, m->profiles[i].entry,
                             m->profiles[j].file, m->profiles[i].file);
                break;
            }
    /* no transfer uncertainty: the water tank would stand for the patient
     * exactly, which no published comparison supports */
    for (size_t i = 0; st == SL_OK && i < m->machine.transfer.nbands; i++)
        if (m->machine.transfer.bands[i].relative < SL_TRANSFER_WARN_BELOW) {
            sl_notes_add(&m->notes,
                         "%s: transfer_uncertainty band %zu is %g: below %g the upper bounds "
                         "assume the water tank stands for the patient almost exactly; the "
                         "defaults are 0.25 to 1.0 (models/README.md)",
                         name, i + 1, m->machine.transfer.bands[i].relative,
                         SL_TRANSFER_WARN_BELOW);
            break;
        }
    if (st != SL_OK) {
        sl_measurements_free(m);
        return st;
    }
    *out = m;
    return SL_OK;
}

sl_status sl_measurements_load(const char *path, sl_measurement_set **out, sl_error *err)
{
    char *data;
    size_t size;
    *out = NULL;
    sl_status st = sl_read_file(path, SL_YAML_MAX_BYTES, &data, &size, err);
    if (st != SL_OK)
        return st;
    bool ok = true;
    char *copy = sl_strdup(path, &ok);
    if (!ok) {
        free(data);
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    }
    st = sl_measurements_load_buffer(data, size, path, dirname(copy), out, err);
    free(copy);
    free(data);
    return st;
}
