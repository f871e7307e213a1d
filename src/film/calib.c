/*
 * Film calibration: a calibration set (YAML) -> per-channel net optical
 * densities -> a fitted dose curve with its covariance and the lowest dose it
 * resolves.
 *
 * Net optical density is netOD = log10(PV0 / PV) with PV0 the robust mean of
 * the unexposed pieces (AAPM TG-235). Two published forms of the curve are
 * fitted, both as dose against netOD so that their chi-squares compare:
 *
 *   power    D = a netOD + b netOD^n                (Devic et al., Med Phys
 *            31:2392 (2004))
 *   rational D = c + b / (10^-netOD - a)            (the scanner response
 *            X(D) = a + b / (D - c) of Lewis et al., Med Phys 39:6339 (2012),
 *            solved for D with X = PV / PV0 = 10^-netOD)
 *
 * Each point is weighted by the dose standard uncertainty that its netOD
 * uncertainty makes through the local slope of the measured points (a
 * secant, fixed before the fit, so that any other least-squares program
 * given the same points and weights finds the same curve). The form of the
 * lower AICc wins, as in `strayline fit`. The covariance is scaled by
 * max(1, chi2/dof). A form whose curve is not increasing over the
 * calibrated range is refused.
 */
#include "film_internal.h"
#include "strayline/fit.h"
#include "strayline/version.h"
#include "strayline/yamlio.h"

#include <libgen.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

#define LN10 2.302585092994046

const char *sl_film_form_name(sl_film_form f)
{
    return f == SL_FILM_FORM_POWER ? "power" : f == SL_FILM_FORM_RATIONAL ? "rational" : "?";
}

double sl_film_form_eval(sl_film_form f, const double *t, double x, double *grad)
{
    if (f == SL_FILM_FORM_POWER) {
        double ax = fabs(x), s = x < 0 ? -1.0 : 1.0;
        double p = ax > 0 ? s * pow(ax, t[2]) : 0.0;
        if (grad) {
            grad[0] = x;
            grad[1] = p;
            grad[2] = ax > 0 ? t[1] * p * log(ax) : 0.0;
        }
        return t[0] * x + t[1] * p;
    }
    double X = pow(10.0, -x), u = X - t[0];
    if (!(u > 0)) {
        if (grad)
            grad[0] = grad[1] = grad[2] = NAN;
        return NAN;
    }
    if (grad) {
        grad[0] = t[1] / (u * u);
        grad[1] = 1.0 / u;
        grad[2] = 1.0;
    }
    return t[2] + t[1] / u;
}

/* d D / d netOD */
static double form_slope(sl_film_form f, const double *t, double x)
{
    if (f == SL_FILM_FORM_POWER) {
        double ax = fabs(x);
        return t[0] + (ax > 0 ? t[1] * t[2] * pow(ax, t[2] - 1) : (t[2] == 1 ? t[1] : 0));
    }
    double X = pow(10.0, -x), u = X - t[0];
    return u > 0 ? t[1] * X * LN10 / (u * u) : NAN;
}

/* ---------------------------------------------- fitting (internal) -- */

typedef struct fit_ctx {
    double xmin_X; /* rational: the smallest 10^-netOD of the points; a = xmin_X - exp(alpha) */
} fit_ctx;

static double model_power(double x, const double *th, double *grad, void *ctx)
{
    (void)ctx;
    double t[3] = {th[0], th[1], exp(th[2])};
    double v = sl_film_form_eval(SL_FILM_FORM_POWER, t, x, grad);
    if (grad)
        grad[2] *= t[2];
    return v;
}

static double model_rational(double x, const double *th, double *grad, void *ctx)
{
    const fit_ctx *c = ctx;
    double ea = exp(th[0]);
    double t[3] = {c->xmin_X - ea, th[1], th[2]};
    double v = sl_film_form_eval(SL_FILM_FORM_RATIONAL, t, x, grad);
    if (grad)
        grad[0] *= -ea;
    return v;
}

/* Weighted linear least squares y = p u + q v (two basis functions). */
static bool lin2(const double *u, const double *v, const double *y, const double *s, size_t n,
                 double *p, double *q)
{
    double a = 0, b = 0, c = 0, r1 = 0, r2 = 0;
    for (size_t i = 0; i < n; i++) {
        double w = 1.0 / (s[i] * s[i]);
        a += w * u[i] * u[i];
        b += w * u[i] * v[i];
        c += w * v[i] * v[i];
        r1 += w * u[i] * y[i];
        r2 += w * v[i] * y[i];
    }
    double det = a * c - b * b;
    if (!(fabs(det) > 1e-300 * (fabs(a * c) + 1)))
        return false;
    *p = (c * r1 - b * r2) / det;
    *q = (a * r2 - b * r1) / det;
    return isfinite(*p) && isfinite(*q);
}

static void fit_form(sl_film_form f, const double *x, const double *y, const double *s,
                     size_t n, sl_film_formfit *out)
{
    memset(out, 0, sizeof *out);
    fit_ctx ctx = {INFINITY};
    for (size_t i = 0; i < n; i++)
        ctx.xmin_X = fmin(ctx.xmin_X, pow(10.0, -x[i]));
    double starts[8 * 3];
    size_t ns = 0;
    double u[256], v[256];
    if (n > 256) {
        snprintf(out->why, sizeof out->why, "more than 256 points");
        return;
    }
    if (f == SL_FILM_FORM_POWER) {
        static const double ns_try[] = {1.5, 2.0, 2.5, 3.0, 4.0};
        for (size_t k = 0; k < 5; k++) {
            for (size_t i = 0; i < n; i++) {
                u[i] = x[i];
                v[i] = (x[i] < 0 ? -1 : 1) * pow(fabs(x[i]), ns_try[k]);
            }
            double p, q;
            if (lin2(u, v, y, s, n, &p, &q)) {
                starts[ns * 3] = p;
                starts[ns * 3 + 1] = q;
                starts[ns * 3 + 2] = log(ns_try[k]);
                ns++;
            }
        }
    } else {
        static const double g_try[] = {0.02, 0.1, 0.3, 0.5, 0.8};
        for (size_t k = 0; k < 5; k++) {
            double a = ctx.xmin_X * (1 - g_try[k]);
            for (size_t i = 0; i < n; i++) {
                u[i] = 1.0 / (pow(10.0, -x[i]) - a);
                v[i] = 1.0;
            }
            double p, q;
            if (lin2(u, v, y, s, n, &p, &q)) {
                starts[ns * 3] = log(ctx.xmin_X * g_try[k]);
                starts[ns * 3 + 1] = p;
                starts[ns * 3 + 2] = q;
                ns++;
            }
        }
    }
    if (ns == 0) {
        snprintf(out->why, sizeof out->why, "no starting point");
        return;
    }
    sl_fit_problem pb = {n, 3, x, y, s,
                         f == SL_FILM_FORM_POWER ? model_power : model_rational, &ctx};
    sl_fit_options o;
    sl_fit_default_options(&o);
    sl_fit_result r;
    sl_error e = {0};
    if (sl_fit_multistart(&pb, starts, ns, &o, &r, &e) != SL_OK) {
        snprintf(out->why, sizeof out->why, "%s", e.msg);
        return;
    }
    double J[3];
    if (f == SL_FILM_FORM_POWER) {
        out->theta[0] = r.theta[0];
        out->theta[1] = r.theta[1];
        out->theta[2] = exp(r.theta[2]);
        J[0] = 1;
        J[1] = 1;
        J[2] = out->theta[2];
    } else {
        double ea = exp(r.theta[0]);
        out->theta[0] = ctx.xmin_X - ea;
        out->theta[1] = r.theta[1];
        out->theta[2] = r.theta[2];
        J[0] = -ea;
        J[1] = 1;
        J[2] = 1;
    }
    out->chisq = r.chisq;
    double k = 3;
    out->aicc = r.chisq + 2 * k + 2 * k * (k + 1) / ((double)n - k - 1);
    out->covar_scale = fmax(1.0, r.chisq / (double)r.dof);
    for (int i = 0; i < 3; i++)
        for (int j = 0; j < 3; j++)
            out->covar[i * 3 + j] = J[i] * J[j] * r.covar[i * 3 + j] * out->covar_scale;
    out->ok = true;
}

/* Increasing over [lo, hi]: checked on a fine grid. */
static bool monotone(sl_film_form f, const double *t, double lo, double hi)
{
    double prev = sl_film_form_eval(f, t, lo, NULL);
    if (!isfinite(prev))
        return false;
    for (int i = 1; i <= 400; i++) {
        double v = sl_film_form_eval(f, t, lo + (hi - lo) * i / 400.0, NULL);
        if (!isfinite(v) || !(v > prev))
            return false;
        prev = v;
    }
    return true;
}

double sl_film_dose(const sl_film_channel *c, double x, double netod_sd, double *sigma)
{
    if (sigma)
        *sigma = NAN;
    if (!c || c->chosen < 0 || !isfinite(x) || x > c->max_netod)
        return NAN;
    const sl_film_formfit *ff = &c->forms[c->chosen];
    double g[3];
    double d = sl_film_form_eval((sl_film_form)c->chosen, ff->theta, x, g);
    if (sigma && isfinite(d)) {
        double var = 0;
        for (int i = 0; i < 3; i++)
            for (int j = 0; j < 3; j++)
                var += g[i] * ff->covar[i * 3 + j] * g[j];
        double sl = form_slope((sl_film_form)c->chosen, ff->theta, x);
        double rel0 = c->pv0_sem / c->pv0 / LN10;
        double vx = netod_sd * netod_sd + c->netod_scatter * c->netod_scatter + rel0 * rel0;
        *sigma = sqrt(fmax(var, 0) + sl * sl * vx);
    }
    return d;
}

/* The lowest dose whose standard uncertainty for a reading of `m` pixels is
 * at most `fraction` of it. */
static double lowest_dose(const sl_film_channel *c, double m, double fraction)
{
    double sd = c->pixel_rel_sd / LN10 / sqrt(m);
    double prev_d = NAN, prev_r = NAN;
    for (int i = 1; i <= 4000; i++) {
        double x = c->max_netod * i / 4000.0;
        double s;
        double d = sl_film_dose(c, x, sd, &s);
        if (!isfinite(d) || d <= 0)
            continue;
        double r = s / d;
        if (r <= fraction) {
            if (isfinite(prev_r) && prev_r > fraction)
                return prev_d + (d - prev_d) * (prev_r - fraction) / (prev_r - r);
            return d;
        }
        prev_d = d;
        prev_r = r;
    }
    return NAN;
}

/* ------------------------------------------------- the calibration set -- */

static char *join_dir(const char *dir, const char *file)
{
    if (file[0] == '/' || !dir || !dir[0] || strcmp(dir, ".") == 0)
        return strdup(file);
    size_t n = strlen(dir) + strlen(file) + 2;
    char *p = malloc(n);
    if (p)
        snprintf(p, n, "%s/%s", dir, file);
    return p;
}

char *sl_film_join_dir_of(const char *base, const char *file)
{
    char *copy = strdup(base);
    if (!copy)
        return NULL;
    char *p = join_dir(dirname(copy), file);
    free(copy);
    return p;
}

void sl_film_curve_free(sl_film_curve *c)
{
    if (!c)
        return;
    free(c->source);
    free(c->notice);
    free(c->lot);
    free(c->film);
    free(c->scanner);
    free(c->scan_settings);
    free(c->exposed);
    free(c->scanned);
    free(c->created);
    free(c->tool_version);
    for (int i = 0; i < 3; i++)
        free(c->ch[i].points);
    for (size_t i = 0; i < c->npieces; i++) {
        free(c->pieces[i].scan);
        free(c->pieces[i].path);
        free(c->pieces[i].scan_before);
        free(c->pieces[i].path_before);
    }
    free(c->pieces);
    sl_notes_free(&c->notes);
    free(c);
}

static int parse_channel(const char *s)
{
    if (strcmp(s, "red") == 0)
        return SL_FILM_RED;
    if (strcmp(s, "green") == 0)
        return SL_FILM_GREEN;
    if (strcmp(s, "blue") == 0)
        return SL_FILM_BLUE;
    if (strcmp(s, "grey") == 0)
        return SL_FILM_GREY;
    return -1;
}

int sl_film_parse_channel(const char *s)
{
    return parse_channel(s);
}

static sl_status check_format(sl_yaml *y, const char *want, sl_error *err)
{
    /* The format first, so that a file of another kind is named as such rather than by the
       first key it lacks. */
    yaml_node_t *root = sl_yaml_root(y);
    if (!root || root->type != YAML_MAPPING_NODE)
        return SL_OK; /* sl_yaml_fields says what is wrong */
    for (yaml_node_pair_t *p = root->data.mapping.pairs.start; p < root->data.mapping.pairs.top;
         p++) {
        yaml_node_t *k = yaml_document_get_node(&y->doc, p->key);
        yaml_node_t *v = yaml_document_get_node(&y->doc, p->value);
        if (k && k->type == YAML_SCALAR_NODE && strcmp((const char *)k->data.scalar.value,
                                                       "format") == 0 &&
            v && v->type == YAML_SCALAR_NODE &&
            strcmp((const char *)v->data.scalar.value, want) != 0)
            return sl_yaml_error(y, v, err, "format: '%s' is not %s", v->data.scalar.value,
                                 want);
    }
    return SL_OK;
}

sl_status sl_film_read_head(sl_yaml *y, const char *want, const char *what, sl_yaml_field *f,
                            size_t nf, sl_error *err)
{
    char *fmt = NULL;
    int ver = 0;
    sl_status st;
    if ((st = check_format(y, want, err)) != SL_OK ||
        (st = sl_yaml_fields(y, sl_yaml_root(y), what, f, nf, err)) != SL_OK ||
        (st = sl_yaml_string(y, f[0].node, "format", &fmt, err)) != SL_OK)
        return st;
    free(fmt); /* check_format compared it: a scalar that is not `want` never gets here */
    if ((st = sl_yaml_int(y, f[1].node, "format_version", &ver, err)) != SL_OK)
        return st;
    if (ver != 1)
        return sl_yaml_error(y, f[1].node, err, "format_version: %d is not supported (1 is)", ver);
    return SL_OK;
}

static sl_status opt_string(sl_yaml *y, yaml_node_t *n, const char *what, char **out,
                            sl_error *err)
{
    *out = NULL;
    return n ? sl_yaml_string(y, n, what, out, err) : SL_OK;
}

/* A region [x, y, width, height] in cm or pixels -> pixel rectangle. */
static sl_status read_region(sl_yaml *y, yaml_node_t *n, bool cm, double pixel_cm,
                             const sl_film_scan *s, long r[4], sl_error *err)
{
    double *v = NULL;
    size_t k = 0;
    const char *what = cm ? "region_cm" : "region_px";
    sl_status st = sl_yaml_numbers(y, n, what, &v, &k, err);
    if (st != SL_OK)
        return st;
    if (k != 4 || !(v[2] > 0) || !(v[3] > 0)) {
        free(v);
        return sl_yaml_error(y, n, err, "%s: needs [x, y, width, height] with positive size",
                             what);
    }
    double f = cm ? 1.0 / pixel_cm : 1.0;
    r[0] = lround(v[0] * f);
    r[1] = lround(v[1] * f);
    r[2] = lround((v[0] + v[2]) * f);
    r[3] = lround((v[1] + v[3]) * f);
    free(v);
    if (r[0] < 0 || r[1] < 0 || r[2] > (long)s->width || r[3] > (long)s->height ||
        r[2] - r[0] < 2 || r[3] - r[1] < 2)
        return sl_yaml_error(y, n, err,
                             "%s: pixels x %ld..%ld, y %ld..%ld: outside the %zu x %zu image "
                             "of %s (or narrower than 2 pixels)",
                             what, r[0], r[2], r[1], r[3], s->width, s->height, s->path);
    return SL_OK;
}

typedef struct scan_cache {
    sl_film_scan **scans;
    size_t n;
} scan_cache;

static sl_status cache_get(scan_cache *c, const char *path, double dpi, sl_film_scan **out,
                           sl_error *err)
{
    for (size_t i = 0; i < c->n; i++)
        if (strcmp(c->scans[i]->path, path) == 0) {
            *out = c->scans[i];
            return SL_OK;
        }
    sl_film_scan **g = realloc(c->scans, (c->n + 1) * sizeof *g);
    if (!g)
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    c->scans = g;
    sl_status st = sl_film_scan_read(path, dpi, out, err);
    if (st != SL_OK)
        return st;
    c->scans[c->n++] = *out;
    return SL_OK;
}

static void cache_free(scan_cache *c)
{
    for (size_t i = 0; i < c->n; i++)
        sl_film_scan_free(c->scans[i]);
    free(c->scans);
}

static int cmp_point(const void *a, const void *b)
{
    const sl_film_point *p = a, *q = b;
    return (p->dose_cgy > q->dose_cgy) - (p->dose_cgy < q->dose_cgy);
}

/* Measure, check and fit one channel. `strict`: a non-monotone response is an
 * error (the channel profiles use), otherwise the channel is left unfitted
 * with a note. */
static sl_status fit_channel(sl_film_curve *c, int chi, int channel, bool strict,
                             double pixel_area_cm2, sl_error *err)
{
    sl_film_channel *ch = &c->ch[chi];
    memset(ch, 0, sizeof *ch);
    ch->channel = channel;
    ch->chosen = -1;
    ch->lowest_dose_cgy = NAN;
    int si = channel == SL_FILM_GREY ? 0 : channel;
    /* The unexposed level. */
    double sum = 0, sum2 = 0, var_pix = 0;
    size_t k0 = 0;
    for (size_t i = 0; i < c->npieces; i++) {
        const sl_film_piece *p = &c->pieces[i];
        if (p->dose_cgy == 0 && !p->held_out) {
            sum += p->stats[si].mean;
            sum2 += p->stats[si].mean * p->stats[si].mean;
            var_pix += p->stats[si].sd * p->stats[si].sd;
            k0++;
        }
    }
    if (k0 == 0)
        return sl_error_set(err, SL_EINPUT,
                            "%s: pieces: no unexposed piece (dose_cgy: 0) to measure net "
                            "optical density against",
                            c->source);
    ch->pv0 = sum / (double)k0;
    if (k0 >= 2)
        ch->pv0_sem = sqrt(fmax(0, (sum2 - k0 * ch->pv0 * ch->pv0) / (double)(k0 - 1)) / k0);
    else
        for (size_t i = 0; i < c->npieces; i++)
            if (c->pieces[i].dose_cgy == 0 && !c->pieces[i].held_out)
                ch->pv0_sem = c->pieces[i].stats[si].sem;
    ch->pixel_rel_sd = sqrt(var_pix / (double)k0) / ch->pv0;

    ch->points = calloc(c->npieces, sizeof *ch->points);
    if (!ch->points)
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    /* With scans before exposure, each piece's netOD is against its own unexposed reading,
       less the change the unexposed pieces show between the two sessions (the scanner's
       drift), so that piece-to-piece differences of the film cancel. */
    double drift = 0, drift_var = 0;
    if (c->pre_scans) {
        double d1 = 0, d2 = 0;
        for (size_t i = 0; i < c->npieces; i++) {
            const sl_film_piece *p = &c->pieces[i];
            if (p->dose_cgy == 0 && !p->held_out) {
                double v = log10(p->before[si].mean / p->stats[si].mean);
                d1 += v;
                d2 += v * v;
            }
        }
        drift = d1 / (double)k0;
        drift_var = k0 >= 2 ? fmax(0, (d2 - k0 * drift * drift) / (double)(k0 - 1)) / k0 : 0;
    }
    for (size_t i = 0; i < c->npieces; i++) {
        const sl_film_piece *p = &c->pieces[i];
        const sl_film_stats *s = &p->stats[si];
        sl_film_point *q = &ch->points[i];
        q->piece = i;
        q->dose_cgy = p->dose_cgy;
        q->held_out = p->held_out;
        if (c->pre_scans) {
            const sl_film_stats *b = &p->before[si];
            q->netod = log10(b->mean / s->mean) - drift;
            q->netod_sigma = sqrt((pow(s->sem / s->mean, 2) + pow(b->sem / b->mean, 2)) /
                                      (LN10 * LN10) +
                                  drift_var);
        } else {
            q->netod = log10(ch->pv0 / s->mean);
            q->netod_sigma = sqrt(pow(s->sem / s->mean, 2) + pow(ch->pv0_sem / ch->pv0, 2)) / LN10;
        }
    }
    ch->npoints = c->npieces;
    qsort(ch->points, ch->npoints, sizeof *ch->points, cmp_point);

    /* Dose levels of the fit points: mean netOD per level, strictly increasing. */
    double lx[256], ld[256];
    size_t nl = 0, nfit = 0;
    for (size_t i = 0; i < ch->npoints; i++) {
        const sl_film_point *q = &ch->points[i];
        if (q->held_out)
            continue;
        nfit++;
        if (nl == 0 || q->dose_cgy != ld[nl - 1]) {
            if (nl == 256)
                return sl_error_set(err, SL_EINPUT, "%s: pieces: more than 256 dose levels",
                                    c->source);
            ld[nl] = q->dose_cgy;
            lx[nl] = 0;
            size_t m = 0;
            for (size_t j = i; j < ch->npoints && ch->points[j].dose_cgy == q->dose_cgy; j++)
                if (!ch->points[j].held_out) {
                    lx[nl] += ch->points[j].netod;
                    m++;
                }
            lx[nl] /= (double)m;
            nl++;
        }
    }
    if (nl < 4)
        return sl_error_set(err, SL_EINPUT,
                            "%s: pieces: %zu dose levels; a calibration curve needs at least 4 "
                            "(0 included)",
                            c->source, nl);
    for (size_t l = 1; l < nl; l++)
        if (!(lx[l] > lx[l - 1])) {
            if (!strict) {
                sl_notes_add(&c->notes,
                             "%s: the %s channel's response is not monotone (%g cGy reads "
                             "netOD %.5f, %g cGy %.5f): channel not fitted",
                             c->source, sl_film_channel_name(channel), ld[l], lx[l], ld[l - 1],
                             lx[l - 1]);
                return SL_OK;
            }
            return sl_error_set(err, SL_EINPUT,
                                "%s: pieces: the %s channel's response is not monotone: %g cGy "
                                "reads net optical density %.5f, not above %g cGy's %.5f",
                                c->source, sl_film_channel_name(channel), ld[l], lx[l],
                                ld[l - 1], lx[l - 1]);
        }
    /* Weights: netOD uncertainty through the local secant slope of the levels. */
    double *x = malloc(nfit * sizeof *x), *y = malloc(nfit * sizeof *y),
           *s = malloc(nfit * sizeof *s);
    if (!x || !y || !s) {
        free(x);
        free(y);
        free(s);
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    }
    size_t k = 0;
    ch->max_netod = -INFINITY;
    ch->max_dose_cgy = 0;
    for (size_t i = 0; i < ch->npoints; i++) {
        sl_film_point *q = &ch->points[i];
        size_t l = 0;
        while (l < nl && ld[l] != q->dose_cgy)
            l++;
        size_t lo = l == 0 || l == nl ? 0 : l - 1, hi = l == 0 ? 1 : l >= nl - 1 ? nl - 1 : l + 1;
        if (l == nl) { /* a held-out piece at a dose of its own: the nearest secant */
            lo = 0;
            while (lo + 2 < nl && ld[lo + 1] < q->dose_cgy)
                lo++;
            hi = lo + 1;
        }
        double slope = (ld[hi] - ld[lo]) / (lx[hi] - lx[lo]);
        q->dose_sigma_cgy = slope * q->netod_sigma;
        if (q->held_out)
            continue;
        x[k] = q->netod;
        y[k] = q->dose_cgy;
        s[k] = q->dose_sigma_cgy;
        if (!(s[k] > 0)) {
            free(x);
            free(y);
            free(s);
            return sl_error_set(err, SL_EINPUT,
                                "%s: pieces: a %g cGy piece has no pixel noise in the %s "
                                "channel (a synthetic or clipped scan?)",
                                c->source, q->dose_cgy, sl_film_channel_name(channel));
        }
        ch->max_netod = fmax(ch->max_netod, q->netod);
        ch->max_dose_cgy = fmax(ch->max_dose_cgy, q->dose_cgy);
        k++;
    }
    double lo = 0;
    for (size_t i = 0; i < k; i++)
        lo = fmin(lo, x[i]);
    for (int f = 0; f < SL_FILM_NFORMS; f++) {
        fit_form((sl_film_form)f, x, y, s, k, &ch->forms[f]);
        if (ch->forms[f].ok && !monotone((sl_film_form)f, ch->forms[f].theta, lo, ch->max_netod)) {
            ch->forms[f].ok = false;
            snprintf(ch->forms[f].why, sizeof ch->forms[f].why,
                     "the fitted curve does not rise over the calibrated range");
        }
        if (ch->forms[f].ok && (ch->chosen < 0 || ch->forms[f].aicc < ch->forms[ch->chosen].aicc))
            ch->chosen = f;
    }
    if (ch->chosen < 0) {
        sl_status st = sl_error_set(err, SL_EINPUT,
                                    "%s: the %s channel: no calibration form could be fitted "
                                    "(power: %s; rational: %s)",
                                    c->source, sl_film_channel_name(channel),
                                    ch->forms[0].why, ch->forms[1].why);
        free(x);
        free(y);
        free(s);
        if (!strict) {
            sl_notes_add(&c->notes, "%s", err->msg);
            sl_error_clear(err);
            return SL_OK;
        }
        return st;
    }
    /* Scatter about the curve beyond the points' own noise, in netOD. */
    const sl_film_formfit *ff = &ch->forms[ch->chosen];
    double ss = 0, sn = 0;
    for (size_t i = 0; i < k; i++) {
        double r = (y[i] - sl_film_form_eval((sl_film_form)ch->chosen, ff->theta, x[i], NULL)) /
                   form_slope((sl_film_form)ch->chosen, ff->theta, x[i]);
        ss += r * r;
        sn += pow(s[i] / form_slope((sl_film_form)ch->chosen, ff->theta, x[i]), 2);
    }
    ch->netod_scatter = sqrt(fmax(0, ss / (double)(k - 3) - sn / (double)k));
    free(x);
    free(y);
    free(s);
    ch->lowest_dose_cgy = lowest_dose(ch, c->reading_area_cm2 / pixel_area_cm2,
                                      c->resolve_fraction);
    return SL_OK;
}

/* Loads the YAML at path and starts a curve that records the file and its
   SHA-256: the calibration set for a new curve, the curve file for a loaded one. */
static sl_status curve_open(const char *path, sl_yaml *y, sl_film_curve **c, sl_error *err)
{
    sl_status st = sl_yaml_load(y, path, err);
    if (st != SL_OK)
        return st;
    bool ok = true;
    if (!(*c = calloc(1, sizeof **c)) || !((*c)->source = sl_strdup(path, &ok)))
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    return sl_sha256_file(path, (*c)->sha256, err);
}

sl_status sl_film_calibrate(const char *path, const sl_film_cal_options *opt,
                            sl_film_curve **out, sl_error *err)
{
    *out = NULL;
    sl_yaml y = {0};
    scan_cache cache = {0};
    sl_film_curve *c = NULL;
    bool ok = true;
    char *chname = NULL;
    sl_status st = curve_open(path, &y, &c, err);
    if (st != SL_OK)
        goto done;
    c->resolve_fraction = opt && opt->resolve_fraction > 0 ? opt->resolve_fraction : 1.0;
    c->reading_area_cm2 = opt && opt->reading_area_cm2 > 0 ? opt->reading_area_cm2
                                                           : SL_FILM_READING_AREA_CM2;
    c->created = sl_strdup(opt && opt->created ? opt->created : "unknown", &ok);
    c->tool_version = sl_strdup(sl_version(), &ok);
    sl_yaml_field f[] = {
        {"format", true, NULL},  {"format_version", true, NULL}, {"notice", false, NULL},
        {"invented", false, NULL}, {"film", true, NULL},          {"scanner", true, NULL},
        {"exposed", false, NULL}, {"scanned", true, NULL},        {"channel", false, NULL},
        {"pieces", true, NULL},
    };
    if ((st = sl_film_read_head(&y, "strayline-film-calibration", "calibration set", f, 10,
                                err)) != SL_OK)
        goto done;
    if ((st = opt_string(&y, f[2].node, "notice", &c->notice, err)) != SL_OK ||
        (f[3].node && (st = sl_yaml_bool(&y, f[3].node, "invented", &c->invented, err)) != SL_OK))
        goto done;
    sl_yaml_field ff[] = {{"lot", true, NULL}, {"model", false, NULL}};
    if ((st = sl_yaml_fields(&y, f[4].node, "film", ff, 2, err)) != SL_OK ||
        (st = sl_yaml_string(&y, ff[0].node, "film lot", &c->lot, err)) != SL_OK ||
        (st = opt_string(&y, ff[1].node, "film model", &c->film, err)) != SL_OK)
        goto done;
    sl_yaml_field sf[] = {{"name", true, NULL}, {"settings", false, NULL}};
    if ((st = sl_yaml_fields(&y, f[5].node, "scanner", sf, 2, err)) != SL_OK ||
        (st = sl_yaml_string(&y, sf[0].node, "scanner name", &c->scanner, err)) != SL_OK ||
        (st = opt_string(&y, sf[1].node, "scanner settings", &c->scan_settings, err)) != SL_OK ||
        (st = opt_string(&y, f[6].node, "exposed", &c->exposed, err)) != SL_OK ||
        (st = sl_yaml_string(&y, f[7].node, "scanned", &c->scanned, err)) != SL_OK)
        goto done;
    c->channel = SL_FILM_RED;
    if (opt && opt->channel)
        c->channel = parse_channel(opt->channel);
    else if (f[8].node) {
        if ((st = sl_yaml_string(&y, f[8].node, "channel", &chname, err)) != SL_OK)
            goto done;
        c->channel = parse_channel(chname);
        if (c->channel < 0) {
            st = sl_yaml_error(&y, f[8].node, err, "channel: '%s' is not red, green, blue or grey",
                               chname);
            goto done;
        }
    }
    if (c->channel < 0) {
        st = sl_error_set(err, SL_EUSAGE, "--channel: not red, green, blue or grey");
        goto done;
    }
    yaml_node_item_t *items;
    size_t n;
    if ((st = sl_yaml_seq(&y, f[9].node, "pieces", &items, &n, err)) != SL_OK)
        goto done;
    if (n == 0 || n > 256) {
        st = sl_yaml_error(&y, f[9].node, err, "pieces: %zu pieces (1 to 256 allowed)", n);
        goto done;
    }
    c->pieces = calloc(n, sizeof *c->pieces);
    if (!c->pieces) {
        st = sl_error_set(err, SL_ENOMEM, "out of memory");
        goto done;
    }
    c->npieces = n;
    int channels = 0;
    for (size_t i = 0; i < n; i++) {
        yaml_node_t *pn = sl_yaml_item(&y, items[i]);
        sl_film_piece *p = &c->pieces[i];
        char what[64];
        snprintf(what, sizeof what, "piece %zu", i + 1);
        p->line = pn ? pn->start_mark.line + 1 : 0;
        sl_yaml_field pf[] = {{"scan", true, NULL},      {"dose_cgy", true, NULL},
                              {"region_cm", false, NULL}, {"region_px", false, NULL},
                              {"check", false, NULL},    {"scan_before", false, NULL},
                              {"region_before_cm", false, NULL},
                              {"region_before_px", false, NULL}};
        if ((st = sl_yaml_fields(&y, pn, what, pf, 8, err)) != SL_OK ||
            (st = sl_yaml_string(&y, pf[0].node, "scan", &p->scan, err)) != SL_OK ||
            (st = sl_yaml_number_in(&y, pf[1].node, "dose_cgy", 0, 1e5, &p->dose_cgy, err)) !=
                SL_OK ||
            (pf[4].node && (st = sl_yaml_bool(&y, pf[4].node, "check", &p->held_out, err)) != SL_OK))
            goto done;
        if (!pf[2].node == !pf[3].node) {
            st = sl_yaml_error(&y, pn, err, "%s: needs one of region_cm and region_px", what);
            goto done;
        }
        if (!(p->path = sl_film_join_dir_of(path, p->scan))) {
            st = sl_error_set(err, SL_ENOMEM, "out of memory");
            goto done;
        }
        sl_film_scan *s;
        if ((st = cache_get(&cache, p->path, opt ? opt->dpi : 0, &s, err)) != SL_OK) {
            sl_error_prefix(err, path);
            goto done;
        }
        memcpy(p->sha256, s->sha256, sizeof p->sha256);
        if (i == 0) {
            channels = s->channels;
            c->bits = s->bits;
            c->pixel_cm = s->pixel_cm;
            if ((st = sl_notes_extend(&c->notes, &s->notes)) != SL_OK)
                goto done;
        } else if (s->channels != channels || s->bits != c->bits) {
            st = sl_yaml_error(&y, pf[0].node, err,
                               "scan: %s has %d channels of %d bits, the first scan %d of %d",
                               s->path, s->channels, s->bits, channels, c->bits);
            goto done;
        } else if ((st = sl_notes_extend(&c->notes, &s->notes)) != SL_OK)
            goto done;
        long r[4] = {0, 0, 0, 0};
        bool cm = pf[2].node != NULL;
        if ((st = read_region(&y, cm ? pf[2].node : pf[3].node, cm, s->pixel_cm, s, r, err)) !=
            SL_OK)
            goto done;
        p->x0 = r[0];
        p->y0 = r[1];
        p->x1 = r[2];
        p->y1 = r[3];
        for (int ch = 0; ch < channels; ch++) {
            if ((st = sl_film_region_stats(s, channels == 1 ? SL_FILM_GREY : ch, r[0], r[1], r[2],
                                           r[3], &p->stats[ch], err)) != SL_OK) {
                char pre[512];
                snprintf(pre, sizeof pre, "%s:%zu: %s (%s)", path, p->line, what, p->scan);
                sl_error_prefix(err, pre);
                goto done;
            }
        }
        /* the piece before exposure: all pieces or none */
        if (i == 0)
            c->pre_scans = pf[5].node != NULL;
        else if (c->pre_scans != (pf[5].node != NULL)) {
            st = sl_yaml_error(&y, pn, err,
                               "%s: scan_before: every piece or none must have a scan before "
                               "exposure",
                               what);
            goto done;
        }
        if (!pf[5].node && (pf[6].node || pf[7].node)) {
            st = sl_yaml_error(&y, pn, err, "%s: a region before exposure without scan_before",
                               what);
            goto done;
        }
        if (pf[5].node) {
            if (pf[6].node && pf[7].node) {
                st = sl_yaml_error(&y, pn, err,
                                   "%s: region_before_cm and region_before_px: one of them", what);
                goto done;
            }
            if ((st = sl_yaml_string(&y, pf[5].node, "scan_before", &p->scan_before, err)) !=
                SL_OK)
                goto done;
            if (!(p->path_before = sl_film_join_dir_of(path, p->scan_before))) {
                st = sl_error_set(err, SL_ENOMEM, "out of memory");
                goto done;
            }
            sl_film_scan *sb;
            if ((st = cache_get(&cache, p->path_before, opt ? opt->dpi : 0, &sb, err)) != SL_OK) {
                sl_error_prefix(err, path);
                goto done;
            }
            memcpy(p->sha256_before, sb->sha256, sizeof p->sha256_before);
            if (sb->channels != channels || sb->bits != c->bits) {
                st = sl_yaml_error(&y, pf[5].node, err,
                                   "scan_before: %s has %d channels of %d bits, the first scan %d "
                                   "of %d",
                                   sb->path, sb->channels, sb->bits, channels, c->bits);
                goto done;
            }
            long rb[4] = {r[0], r[1], r[2], r[3]};
            yaml_node_t *rn = pf[6].node ? pf[6].node : pf[7].node;
            if (rn && (st = read_region(&y, rn, pf[6].node != NULL, sb->pixel_cm, sb, rb, err)) !=
                          SL_OK)
                goto done;
            if (!rn && (rb[2] > (long)sb->width || rb[3] > (long)sb->height)) {
                st = sl_yaml_error(&y, pf[5].node, err,
                                   "scan_before: the piece's region lies outside %s (give "
                                   "region_before_cm)",
                                   sb->path);
                goto done;
            }
            for (int ch = 0; ch < channels; ch++)
                if ((st = sl_film_region_stats(sb, channels == 1 ? SL_FILM_GREY : ch, rb[0], rb[1],
                                               rb[2], rb[3], &p->before[ch], err)) != SL_OK) {
                    char pre[512];
                    snprintf(pre, sizeof pre, "%s:%zu: %s (%s, before exposure)", path, p->line,
                             what, p->scan_before);
                    sl_error_prefix(err, pre);
                    goto done;
                }
        }
    }
    if (channels == 1 && c->channel != SL_FILM_GREY) {
        if (opt && opt->channel) {
            st = sl_error_set(err, SL_EUSAGE, "%s: the scans are grey: --channel grey", path);
            goto done;
        }
        if (f[8].node) {
            st = sl_yaml_error(&y, f[8].node, err, "channel: the scans are grey");
            goto done;
        }
        c->channel = SL_FILM_GREY;
    } else if (channels == 3 && c->channel == SL_FILM_GREY) {
        st = sl_error_set(err, SL_EINPUT, "%s: channel: grey, but the scans are RGB", path);
        goto done;
    }
    c->nchannels = channels;
    double area = c->pixel_cm * c->pixel_cm;
    if (channels == 1) {
        c->bits = c->bits ? c->bits : 16;
        if ((st = fit_channel(c, 0, SL_FILM_GREY, true, area, err)) != SL_OK)
            goto done;
    } else {
        for (int ch = 0; ch < 3; ch++)
            if ((st = fit_channel(c, ch, ch, ch == c->channel, area, err)) != SL_OK)
                goto done;
    }
    const sl_film_channel *used = &c->ch[channels == 1 ? 0 : c->channel];
    if (!isfinite(used->lowest_dose_cgy) &&
        (st = sl_notes_add(&c->notes,
                           "%s: no dose in the calibrated range is resolved to %g of itself "
                           "for a %g cm2 reading",
                           path, c->resolve_fraction, c->reading_area_cm2)) != SL_OK)
        goto done;
    for (size_t i = 0; i < used->npoints; i++) {
        const sl_film_point *q = &used->points[i];
        if (!q->held_out)
            continue;
        double sg;
        double d = sl_film_dose(used, q->netod, q->netod_sigma, &sg);
        if (!isfinite(d))
            st = sl_notes_add(&c->notes,
                              "%s: check piece %zu (%g cGy) is beyond the calibrated range", path,
                              q->piece + 1, q->dose_cgy);
        else if (fabs(d - q->dose_cgy) > 3 * sg)
            st = sl_notes_add(&c->notes,
                              "%s: check piece %zu: %g cGy given, %.4g +- %.2g cGy read "
                              "(beyond 3 standard uncertainties)",
                              path, q->piece + 1, q->dose_cgy, d, sg);
        if (st != SL_OK)
            goto done;
    }
    if (!ok)
        st = sl_error_set(err, SL_ENOMEM, "out of memory");
done:
    free(chname);
    cache_free(&cache);
    sl_yaml_free(&y);
    if (st != SL_OK) {
        sl_film_curve_free(c);
        return st;
    }
    *out = c;
    return SL_OK;
}

/* -------------------------------------------------- the curve file -- */

static void kv_opt(sl_yaml_writer *w, const char *k, const char *v)
{
    if (v)
        sl_yaml_kv_string(w, k, v);
}

static void put_formfit(sl_yaml_writer *w, int f, const sl_film_formfit *ff, bool chosen)
{
    sl_yaml_map_begin(w, false);
    sl_yaml_kv_string(w, "form", sl_film_form_name((sl_film_form)f));
    sl_yaml_kv_bool(w, "fitted", ff->ok);
    sl_yaml_kv_bool(w, "chosen", chosen);
    if (ff->ok) {
        sl_yaml_kv_numbers(w, "parameters", ff->theta, 3);
        sl_yaml_kv_numbers(w, "covariance", ff->covar, 9);
        sl_yaml_kv_number(w, "covariance_scale", ff->covar_scale);
        sl_yaml_kv_number(w, "chisq", ff->chisq);
        sl_yaml_kv_number(w, "aicc", ff->aicc);
    } else
        sl_yaml_kv_string(w, "why_not", ff->why);
    sl_yaml_map_end(w);
}

sl_status sl_film_curve_write(const sl_film_curve *c, FILE *fp, sl_error *err)
{
    fprintf(fp, "# strayline film calibration curve, written by `strayline film calibrate`; see "
                "models/README.md (film).\n");
    if (c->notice)
        fprintf(fp, "# %s\n", c->notice);
    sl_yaml_writer w;
    if (sl_yaml_writer_open(&w, fp) != SL_OK)
        return sl_error_set(err, SL_EIO, "cannot start the YAML writer");
    sl_yaml_map_begin(&w, false);
    sl_yaml_kv_string(&w, "format", "strayline-film-curve");
    sl_yaml_kv_int(&w, "format_version", 1);
    kv_opt(&w, "notice", c->notice);
    sl_yaml_kv_bool(&w, "invented", c->invented);
    sl_yaml_key(&w, "provenance");
    sl_yaml_map_begin(&w, false);
    sl_yaml_kv_string(&w, "calibration_set", c->source);
    sl_yaml_kv_string(&w, "calibration_set_sha256", c->sha256);
    sl_yaml_kv_string(&w, "created", c->created);
    sl_yaml_kv_string(&w, "tool", "strayline");
    sl_yaml_kv_string(&w, "tool_version", c->tool_version);
    sl_yaml_key(&w, "scans");
    sl_yaml_seq_begin(&w, false);
    for (size_t i = 0; i < c->npieces; i++) {
        bool seen = false;
        for (size_t j = 0; j < i; j++)
            seen |= strcmp(c->pieces[j].path, c->pieces[i].path) == 0;
        if (seen)
            continue;
        sl_yaml_map_begin(&w, true);
        sl_yaml_kv_string(&w, "file", c->pieces[i].scan);
        sl_yaml_kv_string(&w, "sha256", c->pieces[i].sha256);
        sl_yaml_map_end(&w);
    }
    for (size_t i = 0; c->pre_scans && i < c->npieces; i++) {
        bool seen = false;
        for (size_t j = 0; j < i; j++)
            seen |= strcmp(c->pieces[j].path_before, c->pieces[i].path_before) == 0;
        for (size_t j = 0; j < c->npieces; j++)
            seen |= strcmp(c->pieces[j].path, c->pieces[i].path_before) == 0;
        if (seen)
            continue;
        sl_yaml_map_begin(&w, true);
        sl_yaml_kv_string(&w, "file", c->pieces[i].scan_before);
        sl_yaml_kv_string(&w, "sha256", c->pieces[i].sha256_before);
        sl_yaml_map_end(&w);
    }
    sl_yaml_seq_end(&w);
    sl_yaml_map_end(&w);
    sl_yaml_key(&w, "film");
    sl_yaml_map_begin(&w, false);
    sl_yaml_kv_string(&w, "lot", c->lot);
    kv_opt(&w, "model", c->film);
    sl_yaml_map_end(&w);
    sl_yaml_key(&w, "scanner");
    sl_yaml_map_begin(&w, false);
    sl_yaml_kv_string(&w, "name", c->scanner);
    kv_opt(&w, "settings", c->scan_settings);
    sl_yaml_map_end(&w);
    kv_opt(&w, "exposed", c->exposed);
    sl_yaml_kv_string(&w, "scanned", c->scanned);
    sl_yaml_kv_int(&w, "bits", c->bits);
    sl_yaml_kv_number(&w, "pixel_cm", c->pixel_cm);
    sl_yaml_kv_string(&w, "channel", sl_film_channel_name(c->channel));
    sl_yaml_kv_string(&w, "net_optical_density",
                      c->pre_scans ? "log10(PV_before / PV) of each piece, less that of the "
                                     "unexposed pieces"
                                   : "log10(PV_unexposed / PV)");
    sl_yaml_key(&w, "lowest_dose_rule");
    sl_yaml_map_begin(&w, false);
    sl_yaml_kv_number(&w, "uncertainty_fraction", c->resolve_fraction);
    sl_yaml_kv_number(&w, "reading_area_cm2", c->reading_area_cm2);
    sl_yaml_map_end(&w);
    sl_yaml_key(&w, "channels");
    sl_yaml_seq_begin(&w, false);
    for (int i = 0; i < c->nchannels; i++) {
        const sl_film_channel *ch = &c->ch[i];
        sl_yaml_map_begin(&w, false);
        sl_yaml_kv_string(&w, "channel", sl_film_channel_name(ch->channel));
        sl_yaml_kv_number(&w, "unexposed_pixel_value", ch->pv0);
        sl_yaml_kv_number(&w, "unexposed_pixel_value_sem", ch->pv0_sem);
        sl_yaml_kv_number(&w, "pixel_relative_sd", ch->pixel_rel_sd);
        if (ch->chosen >= 0) {
            sl_yaml_kv_number(&w, "netod_scatter", ch->netod_scatter);
            sl_yaml_kv_number(&w, "max_netod", ch->max_netod);
            sl_yaml_kv_number(&w, "max_dose_cgy", ch->max_dose_cgy);
            sl_yaml_kv_string(&w, "form", sl_film_form_name((sl_film_form)ch->chosen));
            if (isfinite(ch->lowest_dose_cgy))
                sl_yaml_kv_number(&w, "lowest_resolvable_dose_cgy", ch->lowest_dose_cgy);
            sl_yaml_key(&w, "forms");
            sl_yaml_seq_begin(&w, false);
            for (int f = 0; f < SL_FILM_NFORMS; f++)
                put_formfit(&w, f, &ch->forms[f], f == ch->chosen);
            sl_yaml_seq_end(&w);
        } else
            sl_yaml_kv_string(&w, "form", "none");
        sl_yaml_key(&w, "points");
        sl_yaml_seq_begin(&w, false);
        for (size_t k = 0; k < ch->npoints; k++) {
            const sl_film_point *q = &ch->points[k];
            const sl_film_piece *p = &c->pieces[q->piece];
            sl_yaml_map_begin(&w, true);
            sl_yaml_kv_int(&w, "piece", (long long)q->piece + 1);
            sl_yaml_kv_number(&w, "dose_cgy", q->dose_cgy);
            sl_yaml_kv_number(&w, "pixel_value", p->stats[i].mean);
            sl_yaml_kv_number(&w, "pixel_sd", p->stats[i].sd);
            sl_yaml_kv_int(&w, "pixels_used", (long long)p->stats[i].n_used);
            sl_yaml_kv_number(&w, "netod", q->netod);
            sl_yaml_kv_number(&w, "netod_sigma", q->netod_sigma);
            sl_yaml_kv_number(&w, "dose_sigma_cgy", q->dose_sigma_cgy);
            sl_yaml_kv_bool(&w, "check", q->held_out);
            if (q->held_out && ch->chosen >= 0) {
                double sg, d = sl_film_dose(ch, q->netod, q->netod_sigma, &sg);
                if (isfinite(d)) {
                    sl_yaml_kv_number(&w, "dose_read_cgy", d);
                    sl_yaml_kv_number(&w, "dose_read_sigma_cgy", sg);
                }
            }
            sl_yaml_map_end(&w);
        }
        sl_yaml_seq_end(&w);
        sl_yaml_map_end(&w);
    }
    sl_yaml_seq_end(&w);
    sl_yaml_key(&w, "pieces");
    sl_yaml_seq_begin(&w, false);
    for (size_t i = 0; i < c->npieces; i++) {
        const sl_film_piece *p = &c->pieces[i];
        sl_yaml_map_begin(&w, true);
        sl_yaml_kv_string(&w, "scan", p->scan);
        sl_yaml_kv_number(&w, "dose_cgy", p->dose_cgy);
        double r[4] = {(double)p->x0, (double)p->y0, (double)(p->x1 - p->x0),
                       (double)(p->y1 - p->y0)};
        sl_yaml_kv_numbers(&w, "region_px", r, 4);
        sl_yaml_map_end(&w);
    }
    sl_yaml_seq_end(&w);
    sl_yaml_key(&w, "warnings");
    sl_yaml_seq_begin(&w, false);
    for (size_t i = 0; i < c->notes.count; i++)
        sl_yaml_put_string(&w, c->notes.items[i]);
    sl_yaml_seq_end(&w);
    sl_yaml_map_end(&w);
    return sl_yaml_writer_close(&w, err);
}

/* Reading back: what profiles need (the channels' curves); the rest of the
 * file is checked for its keys only. */
static sl_status load_formfit(sl_yaml *y, yaml_node_t *n, sl_film_formfit *ff, int *form,
                              bool *chosen, sl_error *err)
{
    sl_yaml_field f[] = {{"form", true, NULL},       {"fitted", true, NULL},
                         {"chosen", true, NULL},     {"parameters", false, NULL},
                         {"covariance", false, NULL}, {"covariance_scale", false, NULL},
                         {"chisq", false, NULL},     {"aicc", false, NULL},
                         {"why_not", false, NULL}};
    char *name = NULL;
    sl_status st = sl_yaml_fields(y, n, "form", f, 9, err);
    if (st == SL_OK)
        st = sl_yaml_string(y, f[0].node, "form", &name, err);
    if (st != SL_OK)
        return st;
    *form = strcmp(name, "power") == 0 ? SL_FILM_FORM_POWER
            : strcmp(name, "rational") == 0 ? SL_FILM_FORM_RATIONAL : -1;
    free(name);
    if (*form < 0)
        return sl_yaml_error(y, f[0].node, err, "form: not power or rational");
    if ((st = sl_yaml_bool(y, f[1].node, "fitted", &ff->ok, err)) != SL_OK ||
        (st = sl_yaml_bool(y, f[2].node, "chosen", chosen, err)) != SL_OK)
        return st;
    if (!ff->ok)
        return SL_OK;
    double *p = NULL, *cv = NULL;
    size_t np = 0, nc = 0;
    if (!f[3].node || !f[4].node || !f[6].node || !f[7].node)
        return sl_yaml_error(y, n, err, "a fitted form needs parameters, covariance, chisq, aicc");
    if ((st = sl_yaml_numbers(y, f[3].node, "parameters", &p, &np, err)) != SL_OK)
        return st;
    if ((st = sl_yaml_numbers(y, f[4].node, "covariance", &cv, &nc, err)) != SL_OK) {
        free(p);
        return st;
    }
    if (np != 3 || nc != 9) {
        free(p);
        free(cv);
        return sl_yaml_error(y, n, err, "parameters: 3 values and covariance: 9 values needed");
    }
    memcpy(ff->theta, p, sizeof ff->theta);
    memcpy(ff->covar, cv, sizeof ff->covar);
    free(p);
    free(cv);
    for (int i = 0; i < 3; i++)
        for (int j = 0; j < 3; j++)
            if (ff->covar[i * 3 + j] != ff->covar[j * 3 + i] || (i == j && ff->covar[i * 4] < 0))
                return sl_yaml_error(y, f[4].node, err,
                                     "covariance: not symmetric with non-negative variances");
    if ((st = sl_yaml_number(y, f[6].node, "chisq", &ff->chisq, err)) != SL_OK ||
        (st = sl_yaml_number(y, f[7].node, "aicc", &ff->aicc, err)) != SL_OK)
        return st;
    if (f[5].node)
        st = sl_yaml_number(y, f[5].node, "covariance_scale", &ff->covar_scale, err);
    return st;
}

sl_status sl_film_curve_load(const char *path, sl_film_curve **out, sl_error *err)
{
    *out = NULL;
    sl_yaml y = {0};
    sl_film_curve *c = NULL;
    bool ok = true;
    char *chname = NULL;
    sl_status st = curve_open(path, &y, &c, err);
    if (st != SL_OK)
        goto done;
    sl_yaml_field f[] = {
        {"format", true, NULL},     {"format_version", true, NULL},
        {"notice", false, NULL},    {"invented", false, NULL},
        {"provenance", true, NULL}, {"film", true, NULL},
        {"scanner", true, NULL},    {"exposed", false, NULL},
        {"scanned", true, NULL},    {"bits", true, NULL},
        {"pixel_cm", true, NULL},   {"channel", true, NULL},
        {"net_optical_density", true, NULL}, {"lowest_dose_rule", true, NULL},
        {"channels", true, NULL},   {"pieces", true, NULL},
        {"warnings", true, NULL},
    };
    if ((st = sl_film_read_head(&y, "strayline-film-curve", "curve", f, 17, err)) != SL_OK)
        goto done;
    if ((st = opt_string(&y, f[2].node, "notice", &c->notice, err)) != SL_OK ||
        (f[3].node && (st = sl_yaml_bool(&y, f[3].node, "invented", &c->invented, err)) != SL_OK) ||
        (st = sl_yaml_int(&y, f[9].node, "bits", &c->bits, err)) != SL_OK ||
        (st = sl_yaml_number_in(&y, f[10].node, "pixel_cm", 1e-5, 10, &c->pixel_cm, err)) !=
            SL_OK ||
        (st = sl_yaml_string(&y, f[11].node, "channel", &chname, err)) != SL_OK)
        goto done;
    sl_yaml_field ff[] = {{"lot", true, NULL}, {"model", false, NULL}};
    if ((st = sl_yaml_fields(&y, f[5].node, "film", ff, 2, err)) != SL_OK ||
        (st = sl_yaml_string(&y, ff[0].node, "film lot", &c->lot, err)) != SL_OK ||
        (st = opt_string(&y, ff[1].node, "film model", &c->film, err)) != SL_OK)
        goto done;
    c->channel = parse_channel(chname);
    if (c->channel < 0) {
        st = sl_yaml_error(&y, f[11].node, err, "channel: '%s' is not red, green, blue or grey",
                           chname);
        goto done;
    }
    sl_yaml_field lf[] = {{"uncertainty_fraction", true, NULL}, {"reading_area_cm2", true, NULL}};
    if ((st = sl_yaml_fields(&y, f[13].node, "lowest_dose_rule", lf, 2, err)) != SL_OK ||
        (st = sl_yaml_number_in(&y, lf[0].node, "uncertainty_fraction", 1e-6, 100,
                                &c->resolve_fraction, err)) != SL_OK ||
        (st = sl_yaml_number_in(&y, lf[1].node, "reading_area_cm2", 1e-8, 1e4,
                                &c->reading_area_cm2, err)) != SL_OK)
        goto done;
    yaml_node_item_t *items;
    size_t n;
    if ((st = sl_yaml_seq(&y, f[14].node, "channels", &items, &n, err)) != SL_OK)
        goto done;
    if (n != 1 && n != 3) {
        st = sl_yaml_error(&y, f[14].node, err, "channels: %zu entries (1 or 3)", n);
        goto done;
    }
    c->nchannels = (int)n;
    bool found = false;
    for (size_t i = 0; i < n; i++) {
        sl_film_channel *ch = &c->ch[i];
        ch->chosen = -1;
        ch->lowest_dose_cgy = NAN;
        yaml_node_t *cn = sl_yaml_item(&y, items[i]);
        sl_yaml_field cf[] = {
            {"channel", true, NULL},       {"unexposed_pixel_value", true, NULL},
            {"unexposed_pixel_value_sem", true, NULL}, {"pixel_relative_sd", true, NULL},
            {"netod_scatter", false, NULL}, {"max_netod", false, NULL},
            {"max_dose_cgy", false, NULL}, {"form", true, NULL},
            {"lowest_resolvable_dose_cgy", false, NULL}, {"forms", false, NULL},
            {"points", true, NULL},
        };
        char *nm = NULL;
        if ((st = sl_yaml_fields(&y, cn, "channel", cf, 11, err)) != SL_OK ||
            (st = sl_yaml_string(&y, cf[0].node, "channel", &nm, err)) != SL_OK)
            goto done;
        ch->channel = parse_channel(nm);
        free(nm);
        if (ch->channel < 0) {
            st = sl_yaml_error(&y, cf[0].node, err, "channel: not red, green, blue or grey");
            goto done;
        }
        if ((st = sl_yaml_number_in(&y, cf[1].node, "unexposed_pixel_value", 1, 65535, &ch->pv0,
                                    err)) != SL_OK ||
            (st = sl_yaml_number_in(&y, cf[2].node, "unexposed_pixel_value_sem", 0, 65535,
                                    &ch->pv0_sem, err)) != SL_OK ||
            (st = sl_yaml_number_in(&y, cf[3].node, "pixel_relative_sd", 0, 10, &ch->pixel_rel_sd,
                                    err)) != SL_OK)
            goto done;
        if (!cf[9].node)
            continue;
        if (!cf[4].node || !cf[5].node || !cf[6].node) {
            st = sl_yaml_error(&y, cn, err,
                               "a fitted channel needs netod_scatter, max_netod, max_dose_cgy");
            goto done;
        }
        if ((st = sl_yaml_number_in(&y, cf[4].node, "netod_scatter", 0, 10, &ch->netod_scatter,
                                    err)) != SL_OK ||
            (st = sl_yaml_number_in(&y, cf[5].node, "max_netod", 0, 10, &ch->max_netod, err)) !=
                SL_OK ||
            (st = sl_yaml_number_in(&y, cf[6].node, "max_dose_cgy", 0, 1e5, &ch->max_dose_cgy,
                                    err)) != SL_OK ||
            (cf[8].node && (st = sl_yaml_number_in(&y, cf[8].node, "lowest_resolvable_dose_cgy", 0,
                                                   1e5, &ch->lowest_dose_cgy, err)) != SL_OK))
            goto done;
        yaml_node_item_t *fi;
        size_t nf;
        if ((st = sl_yaml_seq(&y, cf[9].node, "forms", &fi, &nf, err)) != SL_OK)
            goto done;
        if (nf != SL_FILM_NFORMS) {
            st = sl_yaml_error(&y, cf[9].node, err, "forms: %zu entries (2 needed)", nf);
            goto done;
        }
        for (size_t k = 0; k < nf; k++) {
            sl_film_formfit tmp = {0};
            int form;
            bool chosen;
            if ((st = load_formfit(&y, sl_yaml_item(&y, fi[k]), &tmp, &form, &chosen, err)) !=
                SL_OK)
                goto done;
            ch->forms[form] = tmp;
            if (chosen) {
                if (!tmp.ok) {
                    st = sl_yaml_error(&y, cf[9].node, err, "forms: the chosen form is not fitted");
                    goto done;
                }
                ch->chosen = form;
            }
        }
        if (ch->chosen < 0) {
            st = sl_yaml_error(&y, cf[9].node, err, "forms: none is chosen");
            goto done;
        }
        if (!monotone((sl_film_form)ch->chosen, ch->forms[ch->chosen].theta, 0, ch->max_netod)) {
            st = sl_yaml_error(&y, cf[9].node, err,
                               "forms: the chosen curve does not rise over the calibrated range");
            goto done;
        }
        if (ch->channel == c->channel)
            found = true;
    }
    if (!found) {
        st = sl_yaml_error(&y, f[11].node, err, "channel: the %s channel has no fitted curve",
                           chname);
        goto done;
    }
    if (!ok)
        st = sl_error_set(err, SL_ENOMEM, "out of memory");
done:
    free(chname);
    sl_yaml_free(&y);
    if (st != SL_OK) {
        sl_film_curve_free(c);
        return st;
    }
    *out = c;
    return SL_OK;
}
