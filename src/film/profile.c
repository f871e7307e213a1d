/*
 * Film profiles: a film set (YAML) and a calibration curve -> per film a dose
 * map, the field found on it, profiles sampled across it; per profile the
 * films merged; written as profile CSV files and a measurement set that
 * `strayline fit` reads, with a summary (films.yaml) and a QA page a film.
 *
 * The field is found where the dose reaches half the central-axis dose
 * (common practice: the 50 % field edge), iterated from the 99.5th
 * percentile of the map: the centre is the centroid of that region, the
 * central-axis dose the median within 0.5 cm of it. When the centre is
 * above the calibrated range (a long exposure for the far tail), the field
 * is the region above the curve's top instead: it is as symmetric, so its
 * centroid and orientation serve, and the edge itself comes from the
 * merged profile of all the films. The orientation is the second-moment
 * axis of the region when it is elongated, otherwise the four-fold moment
 * of a square field (a round field has none: the declared image axes are
 * taken, with a note).
 *
 * Each profile point averages the pixel values of a cell of the band
 * (step along the line, band width across it) with the robust mean, then
 * turns that mean into dose through the curve, so that pixel noise does not
 * bias low doses through the curve's bend. Films of one profile share the
 * grid k * step from their own field centre, and are merged point by point,
 * weighted by inverse variance.
 */
#include "film_internal.h"

#include "strayline/measure.h"
#include "strayline/version.h"
#include "strayline/yamlio.h"

#include <csv.h>
#include <errno.h>
#include <limits.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>

#define LN10 2.302585092994046

static const char *const dir_names[] = {"crossplane", "inplane", "diagonal"};

typedef struct film_spec {
    char *id, *scan, *path, *applicator, *insert;
    double energy_mev, depth_cm, ssd_cm, tilt_deg, mu, cax_ref;
    int image_x; /* SL_DIR_CROSSPLANE or SL_DIR_INPLANE */
    bool has_control;
    double control[4]; /* unexposed control piece on the same scan: x, y, width, height (cm) */
    int ndirs;
    int dirs[3];
    size_t line;
} film_spec;

typedef struct film_set {
    double band_cm, step_cm, rel_unc, floor_pct;
    int median_px;
    bool invented;
    char *notice;
    size_t nfilms;
    film_spec *films;
} film_set;

static void set_free(film_set *s)
{
    for (size_t i = 0; i < s->nfilms; i++) {
        film_spec *f = &s->films[i];
        free(f->id);
        free(f->scan);
        free(f->path);
        free(f->applicator);
        free(f->insert);
    }
    free(s->films);
    free(s->notice);
}

void sl_film_run_summary_free(sl_film_run_summary *s)
{
    free(s->measurement_set);
    sl_notes_free(&s->notes);
    memset(s, 0, sizeof *s);
}

static int dir_of(const char *s)
{
    for (int i = 0; i < 3; i++)
        if (strcmp(s, dir_names[i]) == 0)
            return i;
    return -1;
}

static sl_status read_film(sl_yaml *y, yaml_node_t *n, size_t i, const char *base, film_spec *f,
                           sl_error *err)
{
    char what[64];
    snprintf(what, sizeof what, "film %zu", i + 1);
    f->line = n ? n->start_mark.line + 1 : 0;
    sl_yaml_field k[] = {
        {"id", true, NULL},          {"scan", true, NULL},          {"energy_mev", true, NULL},
        {"applicator", true, NULL},  {"insert", true, NULL},        {"depth_cm", true, NULL},
        {"ssd_cm", true, NULL},      {"tilt_deg", true, NULL},      {"image_x", true, NULL},
        {"directions", true, NULL},  {"monitor_units", true, NULL},
        {"cax_reference_cgy", true, NULL}, {"unexposed_region_cm", false, NULL},
    };
    char *ix = NULL;
    sl_status st = sl_yaml_fields(y, n, what, k, 13, err);
    if (st == SL_OK)
        st = sl_yaml_string(y, k[0].node, "id", &f->id, err);
    if (st == SL_OK)
        st = sl_yaml_string(y, k[1].node, "scan", &f->scan, err);
    if (st == SL_OK)
        st = sl_yaml_number_in(y, k[2].node, "energy_mev", 0.5, 50, &f->energy_mev, err);
    if (st == SL_OK)
        st = sl_yaml_string(y, k[3].node, "applicator", &f->applicator, err);
    if (st == SL_OK)
        st = sl_yaml_string(y, k[4].node, "insert", &f->insert, err);
    if (st == SL_OK)
        st = sl_yaml_number_in(y, k[5].node, "depth_cm", 0, 30, &f->depth_cm, err);
    if (st == SL_OK)
        st = sl_yaml_number_in(y, k[6].node, "ssd_cm", 50, 200, &f->ssd_cm, err);
    if (st == SL_OK)
        st = sl_yaml_number_in(y, k[7].node, "tilt_deg", -SL_TILT_MAX_DEG, SL_TILT_MAX_DEG,
                               &f->tilt_deg, err);
    if (st == SL_OK)
        st = sl_yaml_string(y, k[8].node, "image_x", &ix, err);
    if (st == SL_OK) {
        f->image_x = dir_of(ix);
        if (f->image_x != SL_DIR_CROSSPLANE && f->image_x != SL_DIR_INPLANE)
            st = sl_yaml_error(y, k[8].node, err,
                               "image_x: '%s': the beam axis along the image's rows is crossplane "
                               "or inplane",
                               ix);
    }
    free(ix);
    yaml_node_item_t *items;
    size_t nd = 0;
    if (st == SL_OK)
        st = sl_yaml_seq(y, k[9].node, "directions", &items, &nd, err);
    if (st == SL_OK && (nd == 0 || nd > 3))
        st = sl_yaml_error(y, k[9].node, err, "directions: 1 to 3 of crossplane, inplane, diagonal");
    for (size_t d = 0; st == SL_OK && d < nd; d++) {
        char *s = NULL;
        yaml_node_t *dn = sl_yaml_item(y, items[d]);
        st = sl_yaml_string(y, dn, "direction", &s, err);
        if (st == SL_OK) {
            int v = dir_of(s);
            for (int e = 0; e < f->ndirs; e++)
                if (f->dirs[e] == v)
                    v = -2;
            if (v < 0)
                st = sl_yaml_error(y, dn, err, "directions: '%s' is not crossplane, inplane or "
                                               "diagonal, or repeats", s);
            else
                f->dirs[f->ndirs++] = v;
        }
        free(s);
    }
    /* A tilt lies in one plane: the profile along it has a side the beam leans
     * toward and one it leans away from (the measurement set's mirror rule); a
     * profile across that plane has neither, and the measurement set has no way
     * to say so. So a tilted film gives the one profile in its tilt's plane. */
    if (st == SL_OK && f->tilt_deg != 0 && f->ndirs != 1)
        st = sl_yaml_error(y, k[9].node, err,
                           "directions: a tilted film (tilt_deg %g) gives one profile, the one "
                           "in the plane of its tilt",
                           f->tilt_deg);
    if (st == SL_OK)
        st = sl_yaml_number_in(y, k[10].node, "monitor_units", 1e-3, 1e6, &f->mu, err);
    if (st == SL_OK)
        st = sl_yaml_number_in(y, k[11].node, "cax_reference_cgy", 1e-3, 1e6, &f->cax_ref, err);
    if (st == SL_OK && k[12].node) {
        double *v = NULL;
        size_t nv = 0;
        st = sl_yaml_numbers(y, k[12].node, "unexposed_region_cm", &v, &nv, err);
        if (st == SL_OK && (nv != 4 || !(v[2] > 0) || !(v[3] > 0) || v[0] < 0 || v[1] < 0))
            st = sl_yaml_error(y, k[12].node, err,
                               "unexposed_region_cm: needs [x, y, width, height] with positive "
                               "size");
        if (st == SL_OK) {
            memcpy(f->control, v, sizeof f->control);
            f->has_control = true;
        }
        free(v);
    }
    if (st == SL_OK && !(f->path = sl_film_join_dir_of(base, f->scan)))
        st = sl_error_set(err, SL_ENOMEM, "out of memory");
    return st;
}

/* ------------------------------------------------ image processing -- */

static int cmp_float(const void *a, const void *b)
{
    float x = *(const float *)a, y = *(const float *)b;
    return (x > y) - (x < y);
}

/* The pixel values of the curve's channel as floats, median-filtered when
 * asked; 0 or the scale's top become NAN (saturated or empty). */
static float *pixel_values(const sl_film_scan *s, int channel, int median, sl_error *err)
{
    const uint16_t *pl = sl_film_plane(s, channel);
    size_t w = s->width, h = s->height;
    float *v = malloc(w * h * sizeof *v);
    if (!v) {
        sl_error_set(err, SL_ENOMEM, "out of memory");
        return NULL;
    }
    for (size_t i = 0; i < w * h; i++)
        v[i] = pl[i] == 0 || pl[i] >= s->max_value ? NAN : (float)pl[i];
    if (median <= 1)
        return v;
    float *o = malloc(w * h * sizeof *o);
    float win[121];
    if (!o) {
        free(v);
        sl_error_set(err, SL_ENOMEM, "out of memory");
        return NULL;
    }
    int r = median / 2;
    for (size_t y = 0; y < h; y++)
        for (size_t x = 0; x < w; x++) {
            int m = 0;
            for (int dy = -r; dy <= r; dy++)
                for (int dx = -r; dx <= r; dx++) {
                    long yy = (long)y + dy, xx = (long)x + dx;
                    if (yy < 0 || xx < 0 || yy >= (long)h || xx >= (long)w)
                        continue;
                    float p = v[(size_t)yy * w + (size_t)xx];
                    if (!isnan(p))
                        win[m++] = p;
                }
            if (m == 0)
                o[y * w + x] = NAN;
            else {
                qsort(win, (size_t)m, sizeof *win, cmp_float);
                o[y * w + x] = m % 2 ? win[m / 2] : 0.5f * (win[m / 2 - 1] + win[m / 2]);
            }
        }
    free(v);
    return o;
}

typedef struct moments {
    double n, sx, sy;
} moments;

/* The region at or above `level` (cGy), or above the calibrated range: its
 * centroid; false if empty or touching the image's border. */
static bool region_centroid(const float *dose, const unsigned char *above, size_t w, size_t h,
                            double level, double *cx, double *cy, size_t *count, bool *border)
{
    double n = 0, sx = 0, sy = 0;
    *border = false;
    for (size_t y = 0; y < h; y++)
        for (size_t x = 0; x < w; x++) {
            size_t i = y * w + x;
            if (above[i] || (!isnan(dose[i]) && dose[i] >= level)) {
                n++;
                sx += (double)x;
                sy += (double)y;
                if (x == 0 || y == 0 || x == w - 1 || y == h - 1)
                    *border = true;
            }
        }
    *count = (size_t)n;
    if (n < 1)
        return false;
    *cx = sx / n;
    *cy = sy / n;
    return true;
}

static double median_near(const float *dose, const unsigned char *above, size_t w, size_t h,
                          double cx, double cy, double rpx, size_t *n_above)
{
    size_t cap = (size_t)((2 * rpx + 3) * (2 * rpx + 3)), n = 0;
    double *v = malloc(cap * sizeof *v);
    *n_above = 0;
    if (!v)
        return NAN;
    for (long y = (long)floor(cy - rpx); y <= (long)ceil(cy + rpx); y++)
        for (long x = (long)floor(cx - rpx); x <= (long)ceil(cx + rpx); x++) {
            if (x < 0 || y < 0 || x >= (long)w || y >= (long)h ||
                (x - cx) * (x - cx) + (y - cy) * (y - cy) > rpx * rpx || n >= cap)
                continue;
            size_t i = (size_t)y * w + (size_t)x;
            if (above[i])
                (*n_above)++;
            else if (!isnan(dose[i]))
                v[n++] = dose[i];
        }
    sl_film_stats st;
    sl_film_robust(v, n, &st);
    free(v);
    if (*n_above > n)
        return NAN;
    return st.median;
}

/* The field's orientation (degrees, in (-45, 45]) from the region's moments. */
static double field_angle(const float *dose, const unsigned char *above, size_t w, size_t h,
                          double level, double cx, double cy, bool *round)
{
    double m20 = 0, m02 = 0, m11 = 0, re4 = 0, im4 = 0, r4 = 0;
    for (size_t y = 0; y < h; y++)
        for (size_t x = 0; x < w; x++) {
            size_t i = y * w + x;
            if (!(above[i] || (!isnan(dose[i]) && dose[i] >= level)))
                continue;
            double dx = (double)x - cx, dy = (double)y - cy;
            m20 += dx * dx;
            m02 += dy * dy;
            m11 += dx * dy;
            double r2 = dx * dx + dy * dy;
            /* (dx + i dy)^4 */
            double a = dx * dx - dy * dy, b = 2 * dx * dy;
            re4 += a * a - b * b;
            im4 += 2 * a * b;
            r4 += r2 * r2;
        }
    *round = false;
    double aniso = sqrt((m20 - m02) * (m20 - m02) + 4 * m11 * m11) / (m20 + m02);
    double ang;
    if (aniso > 0.05)
        ang = 0.5 * atan2(2 * m11, m20 - m02) * 180 / M_PI;
    else if (sqrt(re4 * re4 + im4 * im4) > 0.02 * r4)
        ang = atan2(-im4, -re4) / 4 * 180 / M_PI;
    else {
        *round = true;
        return 0;
    }
    while (ang > 45)
        ang -= 90;
    while (ang <= -45)
        ang += 90;
    return ang;
}

/* The unit vector in the image of a sampled direction, from crossplane's
 * (ex, ey) and inplane's (ix, iy): the diagonal lies between them. */
static void line_direction(int dir, double ex, double ey, double ix, double iy, double *ux,
                           double *uy)
{
    *ux = dir == SL_DIR_CROSSPLANE ? ex : dir == SL_DIR_INPLANE ? ix : (ex + ix) / sqrt(2);
    *uy = dir == SL_DIR_CROSSPLANE ? ey : dir == SL_DIR_INPLANE ? iy : (ey + iy) / sqrt(2);
}

/* Whether a control region (cm: x, y, width, height on the image) meets
 * the band of width band_cm sampled along (ux, uy) through the centre
 * (cx, cy, pixels) from edge to edge of the image: its corners' distances
 * across the line straddle or fall within half the band. */
static bool control_on_band(const double *control, double px, double cx, double cy, double ux,
                            double uy, double band_cm)
{
    double vx = -uy, vy = ux, lo = INFINITY, hi = -INFINITY;
    for (int a = 0; a < 2; a++)
        for (int b = 0; b < 2; b++) {
            double x = (control[0] + a * control[2]) / px - cx;
            double y = (control[1] + b * control[3]) / px - cy;
            double t = x * vx + y * vy;
            lo = fmin(lo, t);
            hi = fmax(hi, t);
        }
    double half = band_cm / 2 / px;
    return lo <= half && hi >= -half;
}

/* Sample one line: cells of step x band about the centre along (ux, uy). */
static sl_status sample_line(const sl_film_scan *s, const float *pv, const sl_film_channel *ch,
                             const float *const *pv3, const sl_film_triple *tr,
                             double resolve_fraction, double cx, double cy, double ux, double uy,
                             double band_cm, double step_cm, double lowest, film_line *L,
                             sl_error *err)
{
    double px = s->pixel_cm;
    double half_band = band_cm / 2 / px, half_step = step_cm / 2 / px, step = step_cm / px;
    double vx = -uy, vy = ux;
    /* on each side, the farthest k whose cell stays inside the image (a film may hold a
       longer tail on one side) */
    long kend[2] = {0, 0};
    for (int side = 0; side < 2; side++) {
        int sgn = side ? 1 : -1;
        for (long k = 0;; k++) {
            bool inside = true;
            for (int a = -1; a <= 1 && inside; a += 2)
                for (int b = -1; b <= 1 && inside; b += 2) {
                    double t = sgn * k * step + a * half_step;
                    double x = cx + t * ux + b * half_band * vx, y = cy + t * uy + b * half_band * vy;
                    if (x < 0 || y < 0 || x > (double)s->width - 1 || y > (double)s->height - 1)
                        inside = false;
                }
            if (!inside)
                break;
            kend[side] = k;
        }
    }
    L->ux = ux;
    L->uy = uy;
    L->kmin = -kend[0];
    L->kmax = kend[1];
    long kmin = L->kmin, kmax = L->kmax;
    size_t n = (size_t)(kmax - kmin + 1);
    L->dose_cgy = malloc(n * sizeof *L->dose_cgy);
    L->sigma_cgy = malloc(n * sizeof *L->sigma_cgy);
    size_t cap = (size_t)((2 * half_step + 2 * half_band + 4) * (2 * half_step + 2 * half_band + 4));
    double *v = malloc(cap * sizeof *v);
    size_t *idx = malloc(cap * sizeof *idx);
    if (tr) {
        L->pv6 = malloc(6 * n * sizeof *L->pv6);
        L->tau = malloc(n * sizeof *L->tau);
        L->tau_sigma = malloc(n * sizeof *L->tau_sigma);
        L->status = malloc(n);
    }
    if (!L->dose_cgy || !L->sigma_cgy || !v || !idx ||
        (tr && (!L->pv6 || !L->tau || !L->tau_sigma || !L->status))) {
        free(v);
        free(idx);
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    }
    for (long k = kmin; k <= kmax; k++) {
        double tx = cx + k * step * ux, ty = cy + k * step * uy;
        double r = half_step + half_band + 1;
        size_t m = 0, bad = 0, all = 0;
        for (long y = (long)floor(ty - r); y <= (long)ceil(ty + r); y++)
            for (long x = (long)floor(tx - r); x <= (long)ceil(tx + r); x++) {
                if (x < 0 || y < 0 || x >= (long)s->width || y >= (long)s->height)
                    continue;
                double dx = x - tx, dy = y - ty;
                double a = dx * ux + dy * uy, b = dx * vx + dy * vy;
                if (fabs(a) > half_step || fabs(b) > half_band || m >= cap)
                    continue;
                all++;
                size_t pi = (size_t)y * s->width + (size_t)x;
                bool isbad = isnan(pv[pi]);
                for (int c = 0; tr && c < 3; c++)
                    isbad |= isnan(pv3[c][pi]);
                if (isbad)
                    bad++;
                else
                    idx[m++] = pi;
            }
        size_t i = (size_t)(k - kmin);
        L->dose_cgy[i] = L->sigma_cgy[i] = NAN;
        if (tr) {
            L->tau[i] = L->tau_sigma[i] = NAN;
            L->status[i] = SL_TRIPLE_ABOVE;
            for (int c = 0; c < 6; c++)
                L->pv6[6 * i + (size_t)c] = NAN;
        }
        if (m < 3 || (double)bad > SL_FILM_MAX_SATURATED_SHARE * (double)all) {
            L->dropped_high++;
            continue;
        }
        sl_film_stats st;
        double d, sg;
        if (tr) {
            /* each channel's robust mean over the same pixels, then one factor for the three */
            double mean[3], sem[3];
            for (int c = 0; c < 3; c++) {
                for (size_t q = 0; q < m; q++)
                    v[q] = pv3[c][idx[q]];
                sl_film_robust(v, m, &st);
                mean[c] = L->pv6[6 * i + (size_t)c] = st.mean;
                sem[c] = L->pv6[6 * i + 3 + (size_t)c] = st.sem;
            }
            sl_film_triple_result tres;
            sl_film_triple_cell(tr, mean, sem, &tres);
            L->status[i] = (unsigned char)tres.status;
            L->tau[i] = tres.tau;
            L->tau_sigma[i] = tres.tau_sigma;
            if (tres.status == SL_TRIPLE_BOUND || tres.status == SL_TRIPLE_FLAT) {
                L->dropped_tau++;
                continue;
            }
            d = tres.dose_cgy;
            sg = tres.sigma_cgy;
            if (!isfinite(d)) {
                L->dropped_high++;
                continue;
            }
            /* the lowest-dose rule of the curve applied to the cell's own uncertainty */
            if (!(d > 0) || !(sg <= resolve_fraction * d)) {
                L->dropped_low++;
                continue;
            }
        } else {
            for (size_t q = 0; q < m; q++)
                v[q] = pv[idx[q]];
            sl_film_robust(v, m, &st);
            double x = log10(ch->pv0 / st.mean);
            double sd = st.sem / st.mean / LN10;
            d = sl_film_dose(ch, x, sd, &sg);
            if (!isfinite(d)) {
                L->dropped_high++;
                continue;
            }
            if (!(d > 0) || (isfinite(lowest) && d < lowest)) {
                L->dropped_low++;
                continue;
            }
        }
        L->dose_cgy[i] = d;
        L->sigma_cgy[i] = sg;
    }
    free(v);
    free(idx);
    return SL_OK;
}

/* The thickness factor of the dose map (triple-channel): per square block of
 * about SL_FILM_MAP_BLOCK_CM, the factor of the block's three channel means
 * (the cell's rule); a block without one (above the range, on the bound, too
 * few pixels) takes the median of the others. NULL when out of memory. */
#define SL_FILM_MAP_BLOCK_CM 0.2
static float *tau_blocks(const sl_film_scan *s, const float *const *pv3, const sl_film_triple *tr,
                         size_t *bpx, size_t *nbx, size_t *nby, size_t *filled)
{
    size_t w = s->width, h = s->height;
    size_t b = (size_t)lround(SL_FILM_MAP_BLOCK_CM / s->pixel_cm);
    if (b < 3)
        b = 3;
    size_t nx = (w + b - 1) / b, ny = (h + b - 1) / b;
    float *t = malloc(nx * ny * sizeof *t);
    double *v = malloc(b * b * sizeof *v), *all = malloc(nx * ny * sizeof *all);
    size_t *idx = malloc(b * b * sizeof *idx);
    if (!t || !v || !all || !idx) {
        free(t);
        free(v);
        free(all);
        free(idx);
        return NULL;
    }
    size_t nall = 0;
    for (size_t by = 0; by < ny; by++)
        for (size_t bx = 0; bx < nx; bx++) {
            size_t m = 0, n = 0;
            for (size_t y = by * b; y < (by + 1) * b && y < h; y++)
                for (size_t x = bx * b; x < (bx + 1) * b && x < w; x++) {
                    size_t i = y * w + x;
                    n++;
                    if (!isnan(pv3[0][i]) && !isnan(pv3[1][i]) && !isnan(pv3[2][i]))
                        idx[m++] = i;
                }
            float tau = NAN;
            if (m >= 3 && 2 * m >= n) {
                double mean[3], sem[3];
                for (int c = 0; c < 3; c++) {
                    sl_film_stats st;
                    for (size_t q = 0; q < m; q++)
                        v[q] = pv3[c][idx[q]];
                    sl_film_robust(v, m, &st);
                    mean[c] = st.mean;
                    sem[c] = st.sem;
                }
                sl_film_triple_result r;
                sl_film_triple_cell(tr, mean, sem, &r);
                if (r.status == SL_TRIPLE_OK) {
                    tau = (float)r.tau;
                    all[nall++] = r.tau;
                }
            }
            t[by * nx + bx] = tau;
        }
    sl_film_stats st;
    sl_film_robust(all, nall, &st);
    double med = nall ? st.median : 1.0;
    *filled = 0;
    for (size_t i = 0; i < nx * ny; i++)
        if (isnan(t[i])) {
            t[i] = (float)med;
            (*filled)++;
        }
    free(v);
    free(all);
    free(idx);
    *bpx = b;
    *nbx = nx;
    *nby = ny;
    return t;
}

/* The thickness factor over a film: median and range over the cells that
 * gave a dose (triple-channel only). */
static sl_status tau_summary(film_result *r, sl_error *err)
{
    size_t cap = 0, n = 0;
    for (size_t d = 0; d < r->nlines; d++)
        cap += (size_t)(r->lines[d].kmax - r->lines[d].kmin + 1);
    double *v = malloc((cap ? cap : 1) * sizeof *v);
    if (!v)
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    r->tau_min = INFINITY;
    r->tau_max = -INFINITY;
    for (size_t d = 0; d < r->nlines; d++) {
        const film_line *L = &r->lines[d];
        for (long k = L->kmin; k <= L->kmax; k++) {
            size_t i = (size_t)(k - L->kmin);
            if (!isfinite(L->dose_cgy[i]))
                continue;
            v[n++] = L->tau[i];
            r->tau_min = fmin(r->tau_min, L->tau[i]);
            r->tau_max = fmax(r->tau_max, L->tau[i]);
        }
    }
    r->ntau = n;
    double sa = 0;
    size_t na = 0;
    for (size_t d = 0; d < r->nlines; d++) {
        const film_line *L = &r->lines[d];
        if (L->kmin <= 0 && L->kmax >= 0 && isfinite(L->dose_cgy[-L->kmin])) {
            sa += L->dose_cgy[-L->kmin];
            na++;
        }
    }
    r->axis_cell_cgy = na ? sa / (double)na : NAN;
    sl_film_stats st;
    sl_film_robust(v, n, &st);
    r->tau_median = n ? st.median : NAN;
    if (!n)
        r->tau_min = r->tau_max = NAN;
    free(v);
    return SL_OK;
}

/* -------------------------------------------------------- writing -- */

static const char *cell_status(const film_line *L, size_t i)
{
    if (isfinite(L->dose_cgy[i]))
        return "dose";
    switch (L->status[i]) {
    case SL_TRIPLE_BOUND: return "thickness_factor_on_bound";
    case SL_TRIPLE_FLAT: return "thickness_factor_undetermined";
    case SL_TRIPLE_OK: return "below_lowest_dose";
    default: return "above_range";
    }
}

/* One film's cells (triple-channel): the channels' means, the factor, the dose. */
static sl_status write_cells(const film_result *r, const char *path, sl_error *err)
{
    sl_outfile of = {0};
    sl_status st = sl_outfile_open(&of, path, NULL, 0, err);
    if (st != SL_OK)
        return st;
    static const char *const head[] = {
        "direction", "off_axis_cm", "pv_red", "pv_green", "pv_blue", "pv_sem_red",
        "pv_sem_green", "pv_sem_blue", "thickness_factor", "thickness_factor_sigma", "dose_cgy",
        "sigma_cgy", "status"};
    for (size_t c = 0; c < 13; c++) {
        csv_fwrite(of.fp, head[c], strlen(head[c]));
        fputc(c < 12 ? ',' : '\n', of.fp);
    }
    for (size_t d = 0; d < r->nlines; d++) {
        const film_line *L = &r->lines[d];
        for (long k = L->kmin; k <= L->kmax; k++) {
            size_t i = (size_t)(k - L->kmin);
            fprintf(of.fp, "%s,%.4f", dir_names[L->direction], (double)k * r->step_cm);
            for (int c = 0; c < 6; c++)
                fprintf(of.fp, ",%.10g", L->pv6[6 * i + (size_t)c]);
            fprintf(of.fp, ",%.10g,%.6g,%.10g,%.6g,%s\n", L->tau[i], L->tau_sigma[i],
                    L->dose_cgy[i], L->sigma_cgy[i], cell_status(L, i));
        }
    }
    return sl_outfile_commit(&of, err);
}

/* Copy a YAML node to the writer as it stands (scalars keep their style). */
static void emit_node(sl_yaml_writer *w, sl_yaml *y, yaml_node_t *n)
{
    yaml_event_t ev;
    if (w->failed || !n)
        return;
    switch (n->type) {
    case YAML_SCALAR_NODE:
        if (!yaml_scalar_event_initialize(&ev, NULL, NULL, n->data.scalar.value,
                                          (int)n->data.scalar.length, 1, 1,
                                          n->data.scalar.style) ||
            !yaml_emitter_emit(&w->em, &ev))
            w->failed = true;
        break;
    case YAML_SEQUENCE_NODE:
        sl_yaml_seq_begin(w, false);
        for (yaml_node_item_t *it = n->data.sequence.items.start;
             it < n->data.sequence.items.top; it++)
            emit_node(w, y, yaml_document_get_node(&y->doc, *it));
        sl_yaml_seq_end(w);
        break;
    case YAML_MAPPING_NODE:
        sl_yaml_map_begin(w, false);
        for (yaml_node_pair_t *p = n->data.mapping.pairs.start; p < n->data.mapping.pairs.top;
             p++) {
            emit_node(w, y, yaml_document_get_node(&y->doc, p->key));
            emit_node(w, y, yaml_document_get_node(&y->doc, p->value));
        }
        sl_yaml_map_end(w);
        break;
    default:
        w->failed = true;
    }
}

static sl_status make_dir(const char *path, sl_error *err)
{
    if (mkdir(path, 0777) != 0 && errno != EEXIST)
        return sl_error_set(err, SL_EIO, "%s: cannot make the folder: %s", path, strerror(errno));
    return SL_OK;
}

static char *path_join(const char *a, const char *b)
{
    size_t n = strlen(a) + strlen(b) + 2;
    char *p = malloc(n);
    if (p)
        snprintf(p, n, "%s/%s", a, b);
    return p;
}

/* One merged profile. */
typedef struct merged {
    size_t first;    /* index of its first film */
    int direction;
    size_t *films;   /* film indices */
    size_t nfilms;
    long kmin, kmax;
    double *pct, *sig; /* percent of the central-axis maximum and its uncertainty */
    size_t npoints;
    char file[256];
    double left, right;
    double overlap_ratio, overlap_sem; /* the longer exposures over the shortest where both read */
    size_t overlap_n;
    /* the points' own uncertainty outside the field, as the measurement set's two numbers:
       the median relative one of the nearer half (higher doses), the median absolute one
       (percent) of the farther half */
    double stat_rel, stat_floor;
} merged;

/* A file name made of the profile's names: anything but letters, digits, '-', '_' and
 * '.' becomes '_', so that an applicator called "../x" cannot leave the output folder. */
/* The file name of a profile: the SSD when it is not the nominal one, the
 * tilt when there is one (so that the films of another SSD or tilt never
 * overwrite each other's files), the direction last. */
static void profile_name(const film_spec *f, int direction, double nominal_ssd_cm, char *buf,
                         size_t size)
{
    char ssd[40] = "", tilt[40] = "";
    if (!(fabs(f->ssd_cm - nominal_ssd_cm) < 1e-6))
        snprintf(ssd, sizeof ssd, "_ssd%g", f->ssd_cm);
    if (f->tilt_deg != 0)
        snprintf(tilt, sizeof tilt, "_tilt%g", f->tilt_deg);
    snprintf(buf, size, "e%02g_%s_%s_d%.2f%s%s_%s.csv", f->energy_mev, f->applicator, f->insert,
             f->depth_cm, ssd, tilt, dir_names[direction]);
    for (char *c = buf; *c; c++)
        if (!((*c >= 'a' && *c <= 'z') || (*c >= 'A' && *c <= 'Z') || (*c >= '0' && *c <= '9') ||
              *c == '-' || *c == '_' || *c == '.'))
            *c = '_';
    if (buf[0] == '.')
        buf[0] = '_';
}

static bool same_profile(const film_spec *a, const film_spec *b)
{
    return a->energy_mev == b->energy_mev && strcmp(a->applicator, b->applicator) == 0 &&
           strcmp(a->insert, b->insert) == 0 && a->depth_cm == b->depth_cm &&
           a->ssd_cm == b->ssd_cm && a->tilt_deg == b->tilt_deg;
}

/* The machine's nominal SSD as the film set's measurement_set gives it, for
 * the profiles' file names only (NAN when absent or not a number: the
 * measurement set read back as fit reads it refuses it then, with its line). */
static double nominal_ssd_of(sl_yaml *y, yaml_node_t *machine)
{
    if (!machine || machine->type != YAML_MAPPING_NODE)
        return NAN;
    for (yaml_node_pair_t *p = machine->data.mapping.pairs.start;
         p < machine->data.mapping.pairs.top; p++) {
        yaml_node_t *k = yaml_document_get_node(&y->doc, p->key);
        if (k && k->type == YAML_SCALAR_NODE &&
            strcmp((const char *)k->data.scalar.value, "nominal_ssd_cm") == 0) {
            double v = NAN;
            sl_error e = {0};
            if (sl_yaml_number(y, yaml_document_get_node(&y->doc, p->value), "nominal_ssd_cm", &v,
                               &e) != SL_OK)
                return NAN;
            return v;
        }
    }
    return NAN;
}

sl_status sl_film_profiles(const char *films_path, const sl_film_profile_options *opt,
                           sl_film_run_summary *sum, sl_error *err)
{
    memset(sum, 0, sizeof *sum);
    sl_yaml y = {0};
    film_set fs = {0};
    sl_film_curve *curve = NULL;
    film_result *res = NULL;
    float **doses = NULL;
    sl_film_scan **scans = NULL;
    merged *mp = NULL;
    size_t nmp = 0;
    char *prof_dir = NULL, *qa_dir = NULL, *ms_path = NULL, *sum_path = NULL;
    char *msbuf = NULL;
    size_t mslen = 0;
    float *pv3[3] = {NULL, NULL, NULL}; /* the triple-channel dose's pixel values of one film */
    sl_machine mach = {0};              /* the measurement set's, for its inserts */
    sl_status st = sl_film_curve_load(opt->curve_path, &curve, err);
    if (st != SL_OK)
        return st;
    if ((st = sl_yaml_load(&y, films_path, err)) != SL_OK)
        goto done;
    sl_yaml_field f[] = {
        {"format", true, NULL},          {"format_version", true, NULL},
        {"notice", false, NULL},         {"invented", false, NULL},
        {"band_width_cm", false, NULL},  {"step_cm", false, NULL},
        {"median_filter_px", false, NULL}, {"uncertainty", true, NULL},
        {"measurement_set", true, NULL}, {"films", true, NULL},
    };
    if ((st = sl_film_read_head(&y, "strayline-films", "film set", f, 10, err)) != SL_OK)
        goto done;
    fs.band_cm = SL_FILM_BAND_CM;
    fs.step_cm = SL_FILM_STEP_CM;
    if ((f[2].node && (st = sl_yaml_string(&y, f[2].node, "notice", &fs.notice, err)) != SL_OK) ||
        (f[3].node && (st = sl_yaml_bool(&y, f[3].node, "invented", &fs.invented, err)) != SL_OK) ||
        (f[4].node && (st = sl_yaml_number_in(&y, f[4].node, "band_width_cm", 0.01, 5,
                                              &fs.band_cm, err)) != SL_OK) ||
        (f[5].node && (st = sl_yaml_number_in(&y, f[5].node, "step_cm", 0.01, 2, &fs.step_cm,
                                              err)) != SL_OK) ||
        (f[6].node && (st = sl_yaml_int(&y, f[6].node, "median_filter_px", &fs.median_px,
                                        err)) != SL_OK))
        goto done;
    if (fs.median_px < 0 || fs.median_px > 11 || (fs.median_px > 1 && fs.median_px % 2 == 0)) {
        st = sl_yaml_error(&y, f[6].node, err, "median_filter_px: an odd number of pixels up to 11 "
                                               "(0 or 1: none)");
        goto done;
    }
    sl_yaml_field uf[] = {{"relative", true, NULL}, {"floor_percent", true, NULL}};
    if ((st = sl_yaml_fields(&y, f[7].node, "uncertainty", uf, 2, err)) != SL_OK ||
        (st = sl_yaml_number_in(&y, uf[0].node, "relative", 0, 1, &fs.rel_unc, err)) != SL_OK ||
        (st = sl_yaml_number_in(&y, uf[1].node, "floor_percent", 0, 100, &fs.floor_pct, err)) !=
            SL_OK)
        goto done;
    sl_yaml_field mf[] = {{"machine", true, NULL},     {"measured", true, NULL},
                          {"reference", true, NULL},   {"applicators", true, NULL},
                          {"inserts", false, NULL},    {"outputs", true, NULL}};
    if ((st = sl_yaml_fields(&y, f[8].node, "measurement_set", mf, 6, err)) != SL_OK ||
        (st = sl_machine_read(&y, mf[0].node, mf[3].node, mf[4].node, mf[5].node, &mach, err)) !=
            SL_OK)
        goto done;
    yaml_node_item_t *items;
    size_t n;
    if ((st = sl_yaml_seq(&y, f[9].node, "films", &items, &n, err)) != SL_OK)
        goto done;
    if (n == 0 || n > 1000) {
        st = sl_yaml_error(&y, f[9].node, err, "films: %zu films (1 to 1000)", n);
        goto done;
    }
    fs.films = calloc(n, sizeof *fs.films);
    res = calloc(n, sizeof *res);
    doses = calloc(n, sizeof *doses);
    scans = calloc(n, sizeof *scans);
    if (!fs.films || !res || !doses || !scans) {
        st = sl_error_set(err, SL_ENOMEM, "out of memory");
        goto done;
    }
    fs.nfilms = n;
    for (size_t i = 0; i < n; i++) {
        if ((st = read_film(&y, sl_yaml_item(&y, items[i]), i, films_path, &fs.films[i], err)) !=
            SL_OK)
            goto done;
        for (size_t j = 0; j < i; j++)
            if (strcmp(fs.films[j].id, fs.films[i].id) == 0) {
                st = sl_error_set(err, SL_EINPUT, "%s:%zu: film %zu: id '%s' repeats film %zu",
                                  films_path, fs.films[i].line, i + 1, fs.films[i].id, j + 1);
                goto done;
            }
        for (const char *c = fs.films[i].id; *c; c++)
            if (!((*c >= 'a' && *c <= 'z') || (*c >= 'A' && *c <= 'Z') || (*c >= '0' && *c <= '9') ||
                  *c == '-' || *c == '_' || *c == '.') || fs.films[i].id[0] == '.') {
                st = sl_error_set(err, SL_EINPUT,
                                  "%s:%zu: film %zu: id '%s': letters, digits, '-', '_' and '.' "
                                  "only (it names files)",
                                  films_path, fs.films[i].line, i + 1, fs.films[i].id);
                goto done;
            }
    }
    /* Refused here, before any scan is read, with the film's own line: an SSD the
     * measurement set would refuse, and a film whose mirrored side repeats another
     * film's profile (+T at one side is -T at the other: the mirror rule). */
    double nominal_ssd = nominal_ssd_of(&y, mf[0].node);
    for (size_t i = 0; i < n; i++) {
        const film_spec *a = &fs.films[i];
        if (isfinite(nominal_ssd) && (a->ssd_cm < nominal_ssd - SL_MEAS_SSD_SHORT_CM - 1e-9 ||
                                      a->ssd_cm > nominal_ssd + SL_MEAS_SSD_LONG_CM + 1e-9)) {
            st = sl_error_set(err, SL_EINPUT,
                              "%s:%zu: film %zu: ssd_cm: %g lies outside %g to %g (the nominal SSD "
                              "%g cm - %g to + %g)",
                              films_path, a->line, i + 1, a->ssd_cm,
                              nominal_ssd - SL_MEAS_SSD_SHORT_CM, nominal_ssd + SL_MEAS_SSD_LONG_CM,
                              nominal_ssd, SL_MEAS_SSD_SHORT_CM, SL_MEAS_SSD_LONG_CM);
            goto done;
        }
        for (size_t j = 0; j < i; j++) {
            const film_spec *b = &fs.films[j];
            if (a->tilt_deg != 0 && b->tilt_deg == -a->tilt_deg && b->ssd_cm == a->ssd_cm &&
                a->energy_mev == b->energy_mev && strcmp(a->applicator, b->applicator) == 0 &&
                strcmp(a->insert, b->insert) == 0 && a->depth_cm == b->depth_cm &&
                a->dirs[0] == b->dirs[0]) {
                st = sl_error_set(err, SL_EINPUT,
                                  "%s:%zu: film %zu: tilt_deg %g: its profile's two sides are "
                                  "the profiles at %g and %g deg, which film %zu (tilt_deg %g) "
                                  "also gives (the mirror rule); give every film of one tilted "
                                  "profile the same sign",
                                  films_path, a->line, i + 1, a->tilt_deg, a->tilt_deg,
                                  -a->tilt_deg, j + 1, b->tilt_deg);
                goto done;
            }
        }
    }
    const sl_film_channel *ch = NULL;
    for (int i = 0; i < curve->nchannels; i++)
        if (curve->ch[i].channel == curve->channel)
            ch = &curve->ch[i];
    double lowest = ch->lowest_dose_cgy;
    /* The triple-channel dose needs the red, green and blue curves. */
    const sl_film_channel *rgb[3] = {NULL, NULL, NULL};
    bool triple = opt->dose_channels == SL_FILM_DOSE_TRIPLE;
    if (triple) {
        for (int i = 0; i < curve->nchannels; i++)
            if (curve->ch[i].channel >= SL_FILM_RED && curve->ch[i].channel <= SL_FILM_BLUE &&
                curve->ch[i].chosen >= 0)
                rgb[curve->ch[i].channel] = &curve->ch[i];
        for (int c = 0; c < 3; c++)
            if (!rgb[c]) {
                st = sl_error_set(err, SL_EINPUT,
                                  "%s: channels: the %s channel has no fitted curve (the "
                                  "triple-channel dose needs red, green and blue calibrated "
                                  "from 48-bit RGB scans)",
                                  opt->curve_path, sl_film_channel_name(c));
                goto done;
            }
    }

    /* Per film: the dose map, the field, the lines. */
    for (size_t i = 0; i < n; i++) {
        film_spec *fp = &fs.films[i];
        film_result *r = &res[i];
        char where[512];
        snprintf(where, sizeof where, "%s:%zu: film %zu (%s)", films_path, fp->line, i + 1,
                 fp->scan);
        if ((st = sl_film_scan_read(fp->path, opt->dpi, &scans[i], err)) != SL_OK) {
            sl_error_prefix(err, where);
            goto done;
        }
        sl_film_scan *s = scans[i];
        if (triple && s->channels != 3) {
            st = sl_error_set(err, SL_EINPUT,
                              "%s: a grey scan has one channel; the triple-channel dose needs "
                              "48-bit RGB scans",
                              where);
            goto done;
        }
        if ((s->channels == 1) != (curve->channel == SL_FILM_GREY)) {
            st = sl_error_set(err, SL_EINPUT, "%s: a %s scan, but the curve is for the %s channel",
                              where, s->channels == 1 ? "grey" : "colour",
                              sl_film_channel_name(curve->channel));
            goto done;
        }
        if ((st = sl_notes_extend(&sum->notes, &s->notes)) != SL_OK)
            goto done;
        if (s->bits != curve->bits &&
            (st = sl_notes_add(&sum->notes, "%s: %d bits a channel, the calibration %d", where,
                               s->bits, curve->bits)) != SL_OK)
            goto done;
        if (triple && s->bits != curve->bits && !fp->has_control) {
            /* the factor is read from total optical densities against the unexposed
               level: the calibration's is not this scan's at another bit depth */
            st = sl_error_set(err, SL_EINPUT,
                              "%s: %d bits a channel, the calibration %d: the triple-channel "
                              "dose needs scans of the calibration's depth or an "
                              "unexposed_region_cm on this scan",
                              where, s->bits, curve->bits);
            goto done;
        }
        /* The film's own unexposed level, from a control piece scanned with it (AAPM TG-235),
           so that the scanner's drift between sessions cancels; else the calibration's. */
        sl_film_channel chf = *ch;
        if (fp->has_control) {
            sl_film_stats cs;
            long r4[4] = {lround(fp->control[0] / s->pixel_cm), lround(fp->control[1] / s->pixel_cm),
                          lround((fp->control[0] + fp->control[2]) / s->pixel_cm),
                          lround((fp->control[1] + fp->control[3]) / s->pixel_cm)};
            if ((st = sl_film_region_stats(s, curve->channel, r4[0], r4[1], r4[2], r4[3], &cs,
                                           err)) != SL_OK) {
                char pre[600];
                snprintf(pre, sizeof pre, "%s: unexposed_region_cm", where);
                sl_error_prefix(err, pre);
                goto done;
            }
            /* a control on exposed film (near the field, off the bands the
             * check below sees) reads dose against the calibration's
             * unexposed pieces; so does a scanner that drifted, which the
             * control is there to cancel: said, for the user to look */
            double dc = sl_film_dose(ch, log10(ch->pv0 / cs.mean), 0, NULL);
            double warn = isfinite(ch->lowest_dose_cgy) ? 2 * ch->lowest_dose_cgy
                                                        : 0.01 * fp->cax_ref;
            if (!(dc <= warn) &&
                (st = sl_notes_add(&sum->notes,
                                   "%s: unexposed_region_cm reads %.3g cGy against the "
                                   "calibration's unexposed pieces (more than %.3g cGy): "
                                   "exposed film, or a scanner that drifted; if it lies near "
                                   "the field, every dose of the tail reads low",
                                   where, dc, warn)) != SL_OK)
                goto done;
            chf.pv0 = cs.mean;
            chf.pv0_sem = cs.sem;
            r->control_pv = cs.mean;
        } else {
            r->control_pv = NAN;
            if ((st = sl_notes_add(&sum->notes,
                                   "%s: no unexposed_region_cm: net optical density against the "
                                   "calibration's unexposed pieces (scanner drift not cancelled)",
                                   where)) != SL_OK)
                goto done;
        }
        /* Triple-channel: each channel's unexposed level from the same source (the
           control piece, or the calibration's unexposed pieces), its optical density
           against the scan's full scale, and each channel's pixel values. */
        sl_film_channel chf3[3];
        sl_film_triple tr;
        r->triple = triple;
        if (triple) {
            tr.max_value = s->max_value;
            tr.tau_lo = SL_FILM_TAU_LO;
            tr.tau_hi = SL_FILM_TAU_HI;
            for (int c = 0; c < 3; c++) {
                chf3[c] = *rgb[c];
                if (fp->has_control) {
                    sl_film_stats cs;
                    long r4[4] = {lround(fp->control[0] / s->pixel_cm),
                                  lround(fp->control[1] / s->pixel_cm),
                                  lround((fp->control[0] + fp->control[2]) / s->pixel_cm),
                                  lround((fp->control[1] + fp->control[3]) / s->pixel_cm)};
                    if ((st = sl_film_region_stats(s, c, r4[0], r4[1], r4[2], r4[3], &cs, err)) !=
                        SL_OK) {
                        char pre[600];
                        snprintf(pre, sizeof pre, "%s: unexposed_region_cm", where);
                        sl_error_prefix(err, pre);
                        goto done;
                    }
                    chf3[c].pv0 = cs.mean;
                    chf3[c].pv0_sem = cs.sem;
                }
                r->pv0[c] = chf3[c].pv0;
                r->pv0_sem[c] = chf3[c].pv0_sem;
                tr.ch[c] = &chf3[c];
                tr.od0[c] = log10(s->max_value / chf3[c].pv0);
            }
            for (int c = 0; c < 3; c++)
                if (!(pv3[c] = pixel_values(s, c, fs.median_px, err))) {
                    st = SL_ENOMEM;
                    goto done;
                }
        }
        float *pv = pixel_values(s, curve->channel, fs.median_px, err);
        if (!pv) {
            st = SL_ENOMEM;
            goto done;
        }
        size_t w = s->width, h = s->height;
        float *dose = malloc(w * h * sizeof *dose);
        unsigned char *above = calloc(w * h, 1);
        if (!dose || !above) {
            free(pv);
            free(dose);
            free(above);
            st = sl_error_set(err, SL_ENOMEM, "out of memory");
            goto done;
        }
        doses[i] = dose;
        size_t nvalid = 0;
        const uint16_t *plane = sl_film_plane(s, curve->channel);
        /* triple-channel: the map is the curve's channel's, its total optical density
           divided by the thickness factor of the pixel's block */
        float *taub = NULL;
        size_t bpx = 1, nbx = 1, nby = 1;
        double od0 = log10(s->max_value / chf.pv0);
        if (triple) {
            if (!(taub = tau_blocks(s, (const float *const *)pv3, &tr, &bpx, &nbx, &nby,
                                    &r->map_blocks_filled))) {
                free(pv);
                free(above);
                st = sl_error_set(err, SL_ENOMEM, "out of memory");
                goto done;
            }
            r->map_blocks = nbx * nby;
            r->map_block_cm = (double)bpx * s->pixel_cm;
        }
        for (size_t k = 0; k < w * h; k++) {
            dose[k] = NAN;
            if (isnan(pv[k])) {
                /* saturated dark pixels of a long exposure are above the range too */
                above[k] = plane[k] == 0;
                continue;
            }
            double x = log10(chf.pv0 / pv[k]);
            if (taub) {
                size_t bx = (k % w) / bpx, by = (k / w) / bpx;
                x = log10(s->max_value / pv[k]) / taub[by * nbx + bx] - od0;
            }
            double d = sl_film_dose(&chf, x, 0, NULL);
            if (isfinite(d)) {
                dose[k] = (float)d;
                nvalid++;
            } else
                above[k] = 1;
        }
        free(taub);
        /* the 99.5th percentile of the map as the first guess of the axis dose */
        float *tmp = malloc((nvalid ? nvalid : 1) * sizeof *tmp);
        if (!tmp) {
            free(pv);
            free(above);
            st = sl_error_set(err, SL_ENOMEM, "out of memory");
            goto done;
        }
        size_t m = 0;
        for (size_t k = 0; k < w * h; k++)
            if (!isnan(dose[k]))
                tmp[m++] = dose[k];
        qsort(tmp, m, sizeof *tmp, cmp_float);
        double hi = m ? tmp[(size_t)(0.995 * (double)(m - 1))] : NAN;
        free(tmp);
        double level = 0.5 * hi, cx = NAN, cy = NAN, cax = NAN;
        size_t count = 0, n_above = 0;
        bool border = false, found = isfinite(level) || nvalid < w * h;
        if (!isfinite(level))
            level = INFINITY;
        bool saturated = false;
        double rpx = 0.5 / s->pixel_cm;
        for (int it = 0; found && it < 4; it++) {
            found = region_centroid(dose, above, w, h, level, &cx, &cy, &count, &border);
            if (!found)
                break;
            cax = median_near(dose, above, w, h, cx, cy, rpx, &n_above);
            if (!isfinite(cax)) {
                saturated = true;
                level = 0.9 * ch->max_dose_cgy;
            } else
                level = 0.5 * cax;
        }
        if (found)
            found = region_centroid(dose, above, w, h, level, &cx, &cy, &count, &border);
        if (!found || count < 20 || border) {
            free(pv);
            free(above);
            st = sl_error_set(err, SL_EINPUT,
                              "%s: the field cannot be found: %s", where,
                              !found || count < 20
                                  ? "no region reaches half of the highest dose on the film"
                                  : "the region at half the central-axis dose reaches the scan's "
                                    "border (the whole field must be on the film)");
            goto done;
        }
        bool round;
        double ang = field_angle(dose, above, w, h, level, cx, cy, &round);
        if (round && (st = sl_notes_add(&sum->notes,
                                        "%s: the field is round: its orientation is taken from "
                                        "the image axes",
                                        where)) != SL_OK) {
            free(pv);
            free(above);
            goto done;
        }
        if (fabs(ang) > 0.5 &&
            (st = sl_notes_add(&sum->notes,
                               "%s: the field is turned %.1f deg on the scan; the profiles follow "
                               "the field's axes",
                               where, ang)) != SL_OK) {
            free(pv);
            free(above);
            goto done;
        }
        if (saturated &&
            (st = sl_notes_add(&sum->notes,
                               "%s: the central axis is above the calibrated range (%g cGy): the "
                               "field's centre is found from the region above %.4g cGy",
                               where, ch->max_dose_cgy, level)) != SL_OK) {
            free(pv);
            free(above);
            goto done;
        }
        /* the film's own axis dose against the reference it is given: above
         * the maximum by far, or at a depth no deeper than about R50 far
         * below half of it, one of the two is in another unit or for other
         * MU, and every percent of the profile with it (found by an
         * independent review: a calibration in Gy, or a reference ten times
         * too high, gave a model 100 or 10 times low). R50 = E / 2.33 cm
         * (IAEA TRS-398, E0 = 2.33 R50), with a margin: 0.8 R50. An insert
         * whose profiles are relative to the open field's maximum carries its
         * cutout factor: half the lower limit, as the measurement set's own
         * axis rule. A beam tilted more than SL_FILM_AXIS_TILT_DEG draws the
         * depth dose toward the surface: the lower limit holds no deeper than
         * the depth of maximum there (none when the output is not given). */
        double axis_rel = saturated ? NAN : cax / fp->cax_ref;
        const sl_insert_spec *ins = sl_machine_insert(&mach, fp->applicator, fp->insert);
        const sl_output_spec *out = sl_machine_output(&mach, fp->energy_mev, fp->applicator);
        double axis_min = SL_FILM_AXIS_MIN_REL *
                          (ins && ins->relative_to == SL_REL_OPEN_CAX ? 0.5 : 1.0);
        bool shallow = fabs(fp->tilt_deg) <= SL_FILM_AXIS_TILT_DEG
                           ? fp->depth_cm <= 0.8 * fp->energy_mev / 2.33
                           : out && fp->depth_cm <= out->dmax_cm;
        if (isfinite(axis_rel) &&
            (axis_rel > SL_FILM_AXIS_MAX_REL || (shallow && axis_rel < axis_min))) {
            free(pv);
            free(above);
            /* the limits printed are the ones applied */
            char expected[160];
            if (!shallow)
                snprintf(expected, sizeof expected, "at most %g", SL_FILM_AXIS_MAX_REL);
            else
                snprintf(expected, sizeof expected, "between %g and %g this shallow%s", axis_min,
                         SL_FILM_AXIS_MAX_REL,
                         axis_min < SL_FILM_AXIS_MIN_REL
                             ? ", for an insert relative to the open field"
                             : "");
            st = sl_error_set(err, SL_EINPUT,
                              "%s: the film's own central-axis dose, %.4g cGy, is %.3g times its "
                              "cax_reference_cgy (%g cGy) at depth %g cm for %g MeV (expected "
                              "%s): the calibration's doses or the reference are in another "
                              "unit, or for other monitor units",
                              where, cax, axis_rel, fp->cax_ref, fp->depth_cm, fp->energy_mev,
                              expected);
            goto done;
        }
        r->id = fp->id;
        r->scan_name = fp->scan;
        r->scan = s;
        r->dose = dose;
        r->max_dose_cgy = ch->max_dose_cgy;
        r->cx = cx;
        r->cy = cy;
        r->angle_deg = ang;
        r->cax_dose_cgy = saturated ? NAN : cax;
        r->threshold_cgy = level;
        r->cax_saturated = saturated;
        r->band_cm = fs.band_cm;
        r->step_cm = fs.step_cm;
        r->cax_reference_cgy = fp->cax_ref;
        r->monitor_units = fp->mu;
        r->energy_mev = fp->energy_mev;
        r->depth_cm = fp->depth_cm;
        r->applicator = fp->applicator;
        r->insert = fp->insert;
        /* crossplane's unit vector in the image: the declared image axis turned by ang */
        double a = ang * M_PI / 180;
        double cxv = cos(a), cyv = sin(a);           /* along the image's x, turned */
        double ex, ey;                               /* crossplane */
        if (fp->image_x == SL_DIR_CROSSPLANE) {
            ex = cxv;
            ey = cyv;
        } else {
            ex = -cyv;
            ey = cxv;
        }
        double ix = -ey, iy = ex;                    /* inplane: a quarter turn */
        /* the control piece must be unexposed: on a sampled band, or in the
         * field, it would take exposed film as the unexposed level, and every
         * dose of the tail would read low (found by an independent review:
         * three times low, with no mark) */
        for (int d = 0; fp->has_control && d < fp->ndirs; d++) {
            double ux, uy;
            line_direction(fp->dirs[d], ex, ey, ix, iy, &ux, &uy);
            if (control_on_band(fp->control, s->pixel_cm, cx, cy, ux, uy, fs.band_cm)) {
                st = sl_error_set(err, SL_EINPUT,
                                  "%s: unexposed_region_cm [%g, %g, %g, %g] lies on the %s band "
                                  "sampled through the field: the control piece must be "
                                  "unexposed film away from the field and the bands",
                                  where, fp->control[0], fp->control[1], fp->control[2],
                                  fp->control[3], dir_names[fp->dirs[d]]);
                free(pv);
                free(above);
                goto done;
            }
        }
        for (int d = 0; d < fp->ndirs; d++) {
            film_line *L = &r->lines[r->nlines++];
            L->direction = fp->dirs[d];
            double ux, uy;
            line_direction(fp->dirs[d], ex, ey, ix, iy, &ux, &uy);
            if ((st = sample_line(s, pv, &chf, (const float *const *)pv3, triple ? &tr : NULL,
                                  curve->resolve_fraction, cx, cy, ux, uy, fs.band_cm, fs.step_cm,
                                  lowest, L, err)) != SL_OK) {
                free(pv);
                free(above);
                goto done;
            }
            sum->dropped_low += L->dropped_low;
            sum->dropped_high += L->dropped_high;
            sum->dropped_tau += L->dropped_tau;
            r->dropped_tau += L->dropped_tau;
        }
        free(pv);
        free(above);
        for (int c = 0; c < 3; c++) {
            free(pv3[c]);
            pv3[c] = NULL;
        }
        if (triple && (st = tau_summary(r, err)) != SL_OK)
            goto done;
    }
    sum->nfilms = n;

    /* Group the lines into profiles and merge them. */
    mp = calloc(3 * n, sizeof *mp);
    if (!mp) {
        st = sl_error_set(err, SL_ENOMEM, "out of memory");
        goto done;
    }
    for (size_t i = 0; i < n; i++)
        for (size_t d = 0; d < res[i].nlines; d++) {
            int dir = res[i].lines[d].direction;
            size_t g = 0;
            while (g < nmp && !(mp[g].direction == dir && same_profile(&fs.films[mp[g].first],
                                                                        &fs.films[i])))
                g++;
            if (g == nmp) {
                mp[g].first = i;
                mp[g].direction = dir;
                mp[g].films = calloc(n, sizeof *mp[g].films);
                if (!mp[g].films) {
                    st = sl_error_set(err, SL_ENOMEM, "out of memory");
                    goto done;
                }
                mp[g].kmin = LONG_MAX;
                mp[g].kmax = LONG_MIN;
                nmp++;
            }
            mp[g].films[mp[g].nfilms++] = i;
            if (res[i].lines[d].kmin < mp[g].kmin)
                mp[g].kmin = res[i].lines[d].kmin;
            if (res[i].lines[d].kmax > mp[g].kmax)
                mp[g].kmax = res[i].lines[d].kmax;
        }
    if (!(prof_dir = path_join(opt->out_dir, "profiles")) ||
        !(qa_dir = path_join(opt->out_dir, "qa")) ||
        !(ms_path = path_join(opt->out_dir, "measurements.yaml")) ||
        !(sum_path = path_join(opt->out_dir, "films.yaml"))) {
        st = sl_error_set(err, SL_ENOMEM, "out of memory");
        goto done;
    }
    char *pts_dir = path_join(opt->out_dir, "points");
    if (!pts_dir) {
        st = sl_error_set(err, SL_ENOMEM, "out of memory");
        goto done;
    }
    st = make_dir(opt->out_dir, err);
    if (st == SL_OK)
        st = make_dir(pts_dir, err);
    free(pts_dir);
    if (st != SL_OK || (st = make_dir(prof_dir, err)) != SL_OK ||
        (st = make_dir(qa_dir, err)) != SL_OK)
        goto done;
    for (size_t g = 0; g < nmp; g++) {
        merged *M = &mp[g];
        const film_spec *f0 = &fs.films[M->first];
        size_t len = (size_t)(M->kmax - M->kmin + 1);
        M->pct = calloc(len, sizeof *M->pct);
        M->sig = calloc(len, sizeof *M->sig);
        if (!M->pct || !M->sig) {
            st = sl_error_set(err, SL_ENOMEM, "out of memory");
            goto done;
        }
        /* films sorted by MU so that the overlap compares longer with shorter */
        for (size_t a = 1; a < M->nfilms; a++)
            for (size_t b = a; b > 0 && fs.films[M->films[b]].mu < fs.films[M->films[b - 1]].mu; b--) {
                size_t t = M->films[b];
                M->films[b] = M->films[b - 1];
                M->films[b - 1] = t;
            }
        /* the overlap: ratio of the sums of the longer exposures and of the shortest one
           where both read (a ratio of point pairs would be biased by the shorter's noise) */
        double sum_l = 0, sum_s = 0, var_l = 0, var_s = 0;
        for (long k = M->kmin; k <= M->kmax; k++) {
            double sw = 0, swp = 0, first = NAN, first_s = NAN;
            for (size_t q = 0; q < M->nfilms; q++) {
                const film_result *r = &res[M->films[q]];
                const film_line *L = NULL;
                for (size_t d = 0; d < r->nlines; d++)
                    if (r->lines[d].direction == M->direction)
                        L = &r->lines[d];
                if (!L || k < L->kmin || k > L->kmax)
                    continue;
                double dd = L->dose_cgy[k - L->kmin], ss = L->sigma_cgy[k - L->kmin];
                if (!isfinite(dd))
                    continue;
                double p = 100 * dd / r->cax_reference_cgy, sp = 100 * ss / r->cax_reference_cgy;
                if (!(sp > 0))
                    sp = 1e-6 * p;
                if (isfinite(first) && q > 0) {
                    sum_l += p;
                    var_l += sp * sp;
                    sum_s += first;
                    var_s += first_s * first_s;
                    M->overlap_n++;
                } else if (!isfinite(first)) {
                    first = p;
                    first_s = sp;
                }
                sw += 1 / (sp * sp);
                swp += p / (sp * sp);
            }
            size_t i = (size_t)(k - M->kmin);
            M->pct[i] = sw > 0 ? swp / sw : NAN;
            M->sig[i] = sw > 0 ? 1 / sqrt(sw) : NAN;
        }
        M->overlap_ratio = M->overlap_n ? sum_l / sum_s : NAN;
        M->overlap_sem = M->overlap_n ? M->overlap_ratio * sqrt(var_l / (sum_l * sum_l) +
                                                                var_s / (sum_s * sum_s))
                                      : NAN;
        if (M->overlap_n > 2 && fabs(M->overlap_ratio - 1) > SL_FILM_OVERLAP_REFUSE &&
            fabs(M->overlap_ratio - 1) > 5 * M->overlap_sem) {
            /* exposures that disagree by this much hold a wrong MU or reference
             * dose, and the merged tail would take one of them: refused */
            st = sl_error_set(err, SL_EINPUT,
                              "%s: %g MeV %s %s %g cm %s: where the films overlap, the longer "
                              "exposure reads %.3f times the shorter (more than %.0f %% apart, "
                              "beyond 5 standard errors): check each film's monitor_units and "
                              "cax_reference_cgy",
                              films_path, f0->energy_mev, f0->applicator, f0->insert,
                              f0->depth_cm, dir_names[M->direction], M->overlap_ratio,
                              100 * SL_FILM_OVERLAP_REFUSE);
            goto done;
        }
        if (M->overlap_n > 2 && fabs(M->overlap_ratio - 1) > 0.03 &&
            fabs(M->overlap_ratio - 1) > 3 * M->overlap_sem &&
            (st = sl_notes_add(&sum->notes,
                               "%s: %g MeV %s %s %g cm %s: where the films overlap, the longer "
                               "exposure reads %.3f times the shorter (check the MU and the "
                               "central-axis references)",
                               films_path, f0->energy_mev, f0->applicator, f0->insert,
                               f0->depth_cm, dir_names[M->direction], M->overlap_ratio)) != SL_OK)
            goto done;
        /* the 50 % edges, as strayline fit will find them */
        double *xs = malloc(len * sizeof *xs), *ps = malloc(len * sizeof *ps);
        if (!xs || !ps) {
            free(xs);
            free(ps);
            st = sl_error_set(err, SL_ENOMEM, "out of memory");
            goto done;
        }
        size_t np = 0;
        double step = fs.step_cm * (M->direction == SL_DIR_DIAGONAL ? 1 : 1);
        for (long k = M->kmin; k <= M->kmax; k++)
            if (isfinite(M->pct[k - M->kmin])) {
                xs[np] = (double)k * step;
                ps[np++] = M->pct[k - M->kmin];
            }
        M->npoints = np;
        char what[256];
        snprintf(what, sizeof what, "%s: %g MeV %s %s %g cm %s", films_path, f0->energy_mev,
                 f0->applicator, f0->insert, f0->depth_cm, dir_names[M->direction]);
        bool axis = false;
        for (size_t q = 0; q < np; q++)
            axis |= fabs(xs[q]) < 0.5 * step;
        if (!axis) {
            free(xs);
            free(ps);
            st = sl_error_set(err, SL_EINPUT,
                              "%s: no film of the profile resolves the central axis (it is above "
                              "the calibrated range on every film: add a shorter exposure)",
                              what);
            goto done;
        }
        if ((st = sl_find_edges(xs, ps, np, what, &M->left, &M->right, NULL, err)) != SL_OK) {
            free(xs);
            free(ps);
            goto done;
        }
        char base[200];
        profile_name(f0, M->direction, nominal_ssd, base, sizeof base);
        snprintf(M->file, sizeof M->file, "profiles/%s", base);
        /* each point's own uncertainty, beside: the fit's CSV has two columns */
        {
            double *rel = malloc(2 * len * sizeof *rel);
            size_t nr = 0;
            char pname[300];
            snprintf(pname, sizeof pname, "points/%s", base);
            char *pp = path_join(opt->out_dir, pname);
            sl_outfile pf = {0};
            if (!rel || !pp) {
                free(rel);
                free(pp);
                free(xs);
                free(ps);
                st = sl_error_set(err, SL_ENOMEM, "out of memory");
                goto done;
            }
            st = sl_outfile_open(&pf, pp, NULL, 0, err);
            free(pp);
            if (st == SL_OK) {
                static const char *const head[] = {"off_axis_cm", "dose_percent", "sigma_percent"};
                for (int c = 0; c < 3; c++) {
                    csv_fwrite(pf.fp, head[c], strlen(head[c]));
                    fputc(c < 2 ? ',' : '\n', pf.fp);
                }
                for (long k = M->kmin; k <= M->kmax; k++) {
                    size_t i = (size_t)(k - M->kmin);
                    if (!isfinite(M->pct[i]))
                        continue;
                    double x = (double)k * step;
                    fprintf(pf.fp, "%.4f,%.6g,%.4g\n", x, M->pct[i], M->sig[i]);
                    if (x < M->left || x > M->right) {
                        rel[2 * nr] = M->pct[i];
                        rel[2 * nr + 1] = M->sig[i];
                        nr++;
                    }
                }
                st = sl_outfile_commit(&pf, err);
            }
            if (st != SL_OK) {
                sl_outfile_abort(&pf);
                free(rel);
                free(xs);
                free(ps);
                goto done;
            }
            M->stat_rel = M->stat_floor = 0;
            if (nr) {
                double *v = malloc(nr * sizeof *v), *a = malloc(nr * sizeof *a),
                       *b = malloc(nr * sizeof *b);
                if (v && a && b) {
                    sl_film_stats rs;
                    for (size_t q = 0; q < nr; q++)
                        v[q] = rel[2 * q];
                    sl_film_robust(v, nr, &rs);
                    size_t na = 0, nb = 0;
                    for (size_t q = 0; q < nr; q++)
                        if (rel[2 * q] >= rs.median)
                            a[na++] = rel[2 * q + 1] / rel[2 * q];
                        else
                            b[nb++] = rel[2 * q + 1];
                    sl_film_robust(a, na, &rs);
                    M->stat_rel = na ? rs.median : 0;
                    sl_film_robust(b, nb, &rs);
                    M->stat_floor = nb ? rs.median : 0;
                }
                free(v);
                free(a);
                free(b);
            }
            free(rel);
        }
        char *cp = path_join(opt->out_dir, M->file);
        sl_outfile of = {0};
        if (!cp) {
            free(xs);
            free(ps);
            st = sl_error_set(err, SL_ENOMEM, "out of memory");
            goto done;
        }
        if ((st = sl_outfile_open(&of, cp, NULL, 0, err)) == SL_OK) {
            static const char *const head[] = {"off_axis_cm", "dose_percent"};
            csv_fwrite(of.fp, head[0], strlen(head[0]));
            fputc(',', of.fp);
            csv_fwrite(of.fp, head[1], strlen(head[1]));
            fputc('\n', of.fp);
            for (size_t q = 0; q < np; q++) {
                char a[32], b[32];
                snprintf(a, sizeof a, "%.4f", xs[q]);
                snprintf(b, sizeof b, "%.6g", ps[q]);
                fprintf(of.fp, "%s,%s\n", a, b);
            }
            st = sl_outfile_commit(&of, err);
        }
        free(cp);
        free(xs);
        free(ps);
        if (st != SL_OK) {
            sl_outfile_abort(&of);
            goto done;
        }
    }
    sum->nprofiles = nmp;

    /* The measurement set: built in memory, read back as strayline fit reads it, then written. */
    {
        FILE *mem = open_memstream(&msbuf, &mslen);
        sl_yaml_writer w;
        if (!mem || sl_yaml_writer_open(&w, mem) != SL_OK) {
            if (mem)
                fclose(mem);
            st = sl_error_set(err, SL_ENOMEM, "out of memory");
            goto done;
        }
        fprintf(mem, "# strayline measurement set, written by `strayline film profile` from %s "
                     "and the curve %s.\n",
                films_path, opt->curve_path);
        if (fs.notice)
            fprintf(mem, "# %s\n", fs.notice);
        sl_yaml_map_begin(&w, false);
        sl_yaml_kv_string(&w, "format", "strayline-measurements");
        sl_yaml_kv_int(&w, "format_version", 2);
        if (fs.notice)
            sl_yaml_kv_string(&w, "notice", fs.notice);
        for (int k = 0; k < 6; k++)
            if (mf[k].node) {
                sl_yaml_key(&w, mf[k].key);
                emit_node(&w, &y, mf[k].node);
            }
        sl_yaml_key(&w, "profiles");
        sl_yaml_seq_begin(&w, false);
        for (size_t g = 0; g < nmp; g++) {
            const film_spec *f0 = &fs.films[mp[g].first];
            sl_yaml_map_begin(&w, false);
            sl_yaml_kv_number(&w, "energy_mev", f0->energy_mev);
            sl_yaml_kv_string(&w, "applicator", f0->applicator);
            sl_yaml_kv_string(&w, "insert", f0->insert);
            sl_yaml_kv_number(&w, "depth_cm", f0->depth_cm);
            sl_yaml_kv_string(&w, "direction", dir_names[mp[g].direction]);
            sl_yaml_kv_string(&w, "file", mp[g].file);
            sl_yaml_key(&w, "uncertainty");
            sl_yaml_map_begin(&w, true);
            sl_yaml_kv_number(&w, "relative",
                              sqrt(fs.rel_unc * fs.rel_unc + mp[g].stat_rel * mp[g].stat_rel));
            sl_yaml_kv_number(&w, "floor_percent",
                              sqrt(fs.floor_pct * fs.floor_pct +
                                   mp[g].stat_floor * mp[g].stat_floor));
            sl_yaml_map_end(&w);
            /* the film's positions are signed as the tilt is (models/README.md, film):
               the mirror rule of the measurement set splits them by side as it stands */
            sl_yaml_kv_number(&w, "tilt_deg", f0->tilt_deg);
            sl_yaml_kv_number(&w, "ssd_cm", f0->ssd_cm);
            sl_yaml_map_end(&w);
        }
        sl_yaml_seq_end(&w);
        sl_yaml_map_end(&w);
        sl_error e2 = {0};
        st = sl_yaml_writer_close(&w, &e2);
        fclose(mem);
        if (st != SL_OK) {
            *err = e2;
            goto done;
        }
        sl_measurement_set *ms = NULL;
        if ((st = sl_measurements_load_buffer(msbuf, mslen, ms_path, opt->out_dir, &ms, err)) !=
            SL_OK) {
            char pre[600];
            snprintf(pre, sizeof pre, "%s: measurement_set (as written to a measurement set)",
                     films_path);
            sl_error_prefix(err, pre);
            goto done;
        }
        st = sl_notes_extend(&sum->notes, &ms->notes);
        sl_measurements_free(ms);
        if (st != SL_OK)
            goto done;
        sl_outfile of = {0};
        const char *inputs[2] = {films_path, opt->curve_path};
        if ((st = sl_outfile_open(&of, ms_path, inputs, 2, err)) != SL_OK)
            goto done;
        if (fwrite(msbuf, 1, mslen, of.fp) != mslen) {
            sl_outfile_abort(&of);
            st = sl_error_set(err, SL_EIO, "%s: cannot write", ms_path);
            goto done;
        }
        if ((st = sl_outfile_commit(&of, err)) != SL_OK)
            goto done;
    }

    /* films.yaml: what was found. */
    {
        sl_outfile of = {0};
        const char *inputs[2] = {films_path, opt->curve_path};
        sl_yaml_writer w;
        if ((st = sl_outfile_open(&of, sum_path, inputs, 2, err)) != SL_OK)
            goto done;
        fprintf(of.fp, "# what `strayline film profile` found on each film; see models/README.md "
                       "(film).\n");
        if (sl_yaml_writer_open(&w, of.fp) != SL_OK) {
            sl_outfile_abort(&of);
            st = sl_error_set(err, SL_ENOMEM, "out of memory");
            goto done;
        }
        sl_yaml_map_begin(&w, false);
        sl_yaml_kv_string(&w, "format", "strayline-film-results");
        sl_yaml_kv_int(&w, "format_version", 1);
        if (fs.notice)
            sl_yaml_kv_string(&w, "notice", fs.notice);
        sl_yaml_kv_string(&w, "film_set", films_path);
        sl_yaml_kv_string(&w, "curve", opt->curve_path);
        sl_yaml_kv_string(&w, "curve_sha256", curve->sha256);
        sl_yaml_kv_string(&w, "created", opt->created ? opt->created : "unknown");
        sl_yaml_kv_string(&w, "tool_version", sl_version());
        sl_yaml_kv_number(&w, "band_width_cm", fs.band_cm);
        sl_yaml_kv_number(&w, "step_cm", fs.step_cm);
        sl_yaml_kv_int(&w, "median_filter_px", fs.median_px);
        if (triple) {
            sl_yaml_kv_string(&w, "dose_channels", "triple");
            double rng[2] = {SL_FILM_TAU_LO, SL_FILM_TAU_HI};
            sl_yaml_kv_numbers(&w, "thickness_factor_range", rng, 2);
            sl_yaml_kv_number(&w, "resolve_fraction", curve->resolve_fraction);
        } else {
            sl_yaml_kv_string(&w, "dose_channels", "single");
            sl_yaml_kv_string(&w, "dose_channel", sl_film_channel_name(curve->channel));
            if (isfinite(lowest))
                sl_yaml_kv_number(&w, "lowest_resolvable_dose_cgy", lowest);
        }
        sl_yaml_key(&w, "films");
        sl_yaml_seq_begin(&w, false);
        for (size_t i = 0; i < n; i++) {
            const film_result *r = &res[i];
            sl_yaml_map_begin(&w, false);
            sl_yaml_kv_string(&w, "id", r->id);
            sl_yaml_kv_string(&w, "scan", r->scan_name);
            sl_yaml_kv_string(&w, "sha256", r->scan->sha256);
            sl_yaml_kv_number(&w, "pixel_cm", r->scan->pixel_cm);
            sl_yaml_kv_bool(&w, "pixel_size_from_tags", r->scan->dpi_from_tags);
            double c[2] = {r->cx * r->scan->pixel_cm, r->cy * r->scan->pixel_cm};
            sl_yaml_kv_numbers(&w, "centre_cm", c, 2);
            sl_yaml_kv_number(&w, "rotation_deg", r->angle_deg);
            if (isfinite(r->cax_dose_cgy))
                sl_yaml_kv_number(&w, "cax_dose_cgy", r->cax_dose_cgy);
            else
                sl_yaml_kv_string(&w, "cax_dose_cgy", "above the calibrated range");
            sl_yaml_kv_number(&w, "field_level_cgy", r->threshold_cgy);
            size_t lo = 0, hi = 0;
            for (size_t d = 0; d < r->nlines; d++) {
                lo += r->lines[d].dropped_low;
                hi += r->lines[d].dropped_high;
            }
            sl_yaml_kv_int(&w, "points_below_lowest_dose", (long long)lo);
            sl_yaml_kv_int(&w, "points_above_range", (long long)hi);
            if (r->triple) {
                sl_yaml_kv_int(&w, "points_thickness_factor_on_bound", (long long)r->dropped_tau);
                if (isfinite(r->axis_cell_cgy))
                    sl_yaml_kv_number(&w, "axis_cell_dose_cgy", r->axis_cell_cgy);
                sl_yaml_key(&w, "map_thickness_blocks");
                sl_yaml_map_begin(&w, true);
                sl_yaml_kv_number(&w, "block_cm", r->map_block_cm);
                sl_yaml_kv_int(&w, "blocks", (long long)r->map_blocks);
                sl_yaml_kv_int(&w, "given_the_median", (long long)r->map_blocks_filled);
                sl_yaml_map_end(&w);
                sl_yaml_kv_numbers(&w, "unexposed_pixel_values", r->pv0, 3);
                sl_yaml_kv_numbers(&w, "unexposed_pixel_value_sems", r->pv0_sem, 3);
                sl_yaml_key(&w, "thickness_factor");
                sl_yaml_map_begin(&w, true);
                sl_yaml_kv_int(&w, "cells", (long long)r->ntau);
                if (r->ntau) {
                    sl_yaml_kv_number(&w, "median", r->tau_median);
                    sl_yaml_kv_number(&w, "min", r->tau_min);
                    sl_yaml_kv_number(&w, "max", r->tau_max);
                }
                sl_yaml_map_end(&w);
                char cp[300];
                snprintf(cp, sizeof cp, "cells/%s.csv", r->id);
                sl_yaml_kv_string(&w, "cells", cp);
            }
            char qa[300];
            snprintf(qa, sizeof qa, "qa/%s.html", r->id);
            sl_yaml_kv_string(&w, "qa_page", qa);
            sl_yaml_map_end(&w);
        }
        sl_yaml_seq_end(&w);
        sl_yaml_key(&w, "profiles");
        sl_yaml_seq_begin(&w, false);
        for (size_t g = 0; g < nmp; g++) {
            const merged *M = &mp[g];
            sl_yaml_map_begin(&w, false);
            sl_yaml_kv_string(&w, "file", M->file);
            sl_yaml_kv_number(&w, "tilt_deg", fs.films[M->first].tilt_deg);
            sl_yaml_kv_number(&w, "ssd_cm", fs.films[M->first].ssd_cm);
            sl_yaml_key(&w, "films");
            sl_yaml_seq_begin(&w, true);
            for (size_t q = 0; q < M->nfilms; q++)
                sl_yaml_put_string(&w, fs.films[M->films[q]].id);
            sl_yaml_seq_end(&w);
            sl_yaml_kv_int(&w, "points", (long long)M->npoints);
            sl_yaml_kv_number(&w, "edge_left_cm", M->left);
            sl_yaml_kv_number(&w, "edge_right_cm", M->right);
            sl_yaml_kv_number(&w, "width_cm", M->right - M->left);
            sl_yaml_kv_number(&w, "statistical_relative_uncertainty", M->stat_rel);
            sl_yaml_kv_number(&w, "statistical_floor_percent", M->stat_floor);
            if (M->overlap_n) {
                sl_yaml_kv_int(&w, "overlap_points", (long long)M->overlap_n);
                sl_yaml_kv_number(&w, "overlap_ratio", M->overlap_ratio);
                sl_yaml_kv_number(&w, "overlap_ratio_sem", M->overlap_sem);
            }
            sl_yaml_map_end(&w);
        }
        sl_yaml_seq_end(&w);
        sl_yaml_map_end(&w);
        if ((st = sl_yaml_writer_close(&w, err)) != SL_OK ||
            (st = sl_outfile_commit(&of, err)) != SL_OK) {
            sl_outfile_abort(&of);
            goto done;
        }
    }

    /* Triple-channel: every cell of every film with its channels' readings. */
    if (triple) {
        char *cells_dir = path_join(opt->out_dir, "cells");
        if (!cells_dir) {
            st = sl_error_set(err, SL_ENOMEM, "out of memory");
            goto done;
        }
        st = make_dir(cells_dir, err);
        for (size_t i = 0; st == SL_OK && i < n; i++) {
            char name[300];
            snprintf(name, sizeof name, "%s.csv", res[i].id);
            char *cp = path_join(cells_dir, name);
            if (!cp) {
                st = sl_error_set(err, SL_ENOMEM, "out of memory");
                break;
            }
            st = write_cells(&res[i], cp, err);
            free(cp);
        }
        free(cells_dir);
        if (st != SL_OK)
            goto done;
    }

    /* QA pages. */
    for (size_t i = 0; i < n; i++) {
        char name[300];
        snprintf(name, sizeof name, "%s.html", res[i].id);
        char *qp = path_join(qa_dir, name);
        sl_outfile of = {0};
        if (!qp) {
            st = sl_error_set(err, SL_ENOMEM, "out of memory");
            goto done;
        }
        st = sl_outfile_open(&of, qp, NULL, 0, err);
        free(qp);
        if (st != SL_OK)
            goto done;
        if ((st = sl_film_qa_page(&res[i], curve, of.fp, err)) != SL_OK ||
            (st = sl_outfile_commit(&of, err)) != SL_OK) {
            sl_outfile_abort(&of);
            goto done;
        }
    }
    sum->measurement_set = ms_path;
    ms_path = NULL;
done:
    sl_machine_free(&mach);
    for (int c = 0; c < 3; c++)
        free(pv3[c]);
    free(msbuf);
    free(prof_dir);
    free(qa_dir);
    free(ms_path);
    free(sum_path);
    for (size_t g = 0; g < nmp; g++) {
        free(mp[g].films);
        free(mp[g].pct);
        free(mp[g].sig);
    }
    free(mp);
    for (size_t i = 0; res && i < fs.nfilms; i++)
        for (size_t d = 0; d < res[i].nlines; d++) {
            free(res[i].lines[d].dose_cgy);
            free(res[i].lines[d].sigma_cgy);
            free(res[i].lines[d].pv6);
            free(res[i].lines[d].tau);
            free(res[i].lines[d].tau_sigma);
            free(res[i].lines[d].status);
        }
    free(res);
    for (size_t i = 0; doses && i < fs.nfilms; i++)
        free(doses[i]);
    free(doses);
    for (size_t i = 0; scans && i < fs.nfilms; i++)
        sl_film_scan_free(scans[i]);
    free(scans);
    set_free(&fs);
    sl_yaml_free(&y);
    sl_film_curve_free(curve);
    return st;
}
