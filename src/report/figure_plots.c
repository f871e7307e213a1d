/*
 * The plots of strayline's reports (see figure.h): the dose against the
 * distance from the field edge at one organ's own depth, the dose-volume
 * histogram of an organ, and the fit report's small multiples.
 *
 * The dose-distance curve is evaluated exactly as the dose stage evaluates
 * the organ's point nearest the field edge (its depth, its direction in the
 * beam's eye view, its distance from the applicator, any what-if shield),
 * only with the distance varied, so the organ's marker lies on the curve;
 * the figure says which commissioned depths the model used there. Doses are
 * cGy, a fetus's mGy, as in the tables; action levels are drawn in the same
 * unit.
 */
#include "figure.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

static bool is_fetus(const sl_assessment *a)
{
    return a && a->kind && strcmp(a->kind->kind, "fetus") == 0;
}

static double font_for(double w, double h)
{
    return fmin(fmax(fmin(w, h) / 40, 6.5), 9);
}

static void set_rgb(cairo_t *cr, const double c[3])
{
    cairo_set_source_rgb(cr, c[0], c[1], c[2]);
}

static const double fit_rgb[3] = {0.11, 0.37, 0.62};
static const double data_rgb[3] = {0.70, 0.15, 0.12};
static const double level_rgb[3] = {0.55, 0.05, 0.10};

/* A closed band between lo and hi over xs: the upper edge forward, the lower
 * edge back. Points with a non-finite value are left out of both edges. */
static size_t band_path(cairo_t *cr, const fig_axes *a, const double *xs, const double *lo,
                        const double *hi, size_t n)
{
    size_t k = 0;
    cairo_new_path(cr);
    for (size_t i = 0; i < n; i++) {
        if (!isfinite(hi[i]) || !isfinite(lo[i]))
            continue;
        double y = fig_ax_y(a, fmin(hi[i], a->logy ? a->y1 * 10 : hi[i]));
        if (k++ == 0)
            cairo_move_to(cr, fig_ax_x(a, xs[i]), y);
        else
            cairo_line_to(cr, fig_ax_x(a, xs[i]), y);
    }
    for (size_t i = n; i-- > 0;) {
        if (!isfinite(hi[i]) || !isfinite(lo[i]))
            continue;
        double v = a->logy ? fmax(lo[i], a->y0 * 0.5) : lo[i];
        cairo_line_to(cr, fig_ax_x(a, xs[i]), fig_ax_y(a, v));
        k++;
    }
    cairo_close_path(cr);
    fig_path_thin(cr);
    return k;
}

static size_t line_path(cairo_t *cr, const fig_axes *a, const double *xs, const double *ys,
                        size_t n)
{
    size_t k = 0;
    cairo_new_path(cr);
    for (size_t i = 0; i < n; i++) {
        if (!isfinite(ys[i]))
            continue;
        double y = fig_ax_y(a, a->logy ? fmax(ys[i], a->y0 * 0.5) : ys[i]);
        if (k++ == 0)
            cairo_move_to(cr, fig_ax_x(a, xs[i]), y);
        else
            cairo_line_to(cr, fig_ax_x(a, xs[i]), y);
    }
    fig_path_thin(cr);
    return k;
}

/* A dot: a subpath of no length, which a round cap draws as a disc in
 * SVG, PDF and cairo's own rasteriser alike (a fraction of the size of an
 * arc's curves in the file). */
static void dot(cairo_t *cr, double x, double y)
{
    cairo_move_to(cr, x, y);
    cairo_line_to(cr, x, y);
}

static void dots_stroke(cairo_t *cr, double diameter)
{
    cairo_set_line_cap(cr, CAIRO_LINE_CAP_ROUND);
    cairo_set_line_width(cr, diameter);
    cairo_stroke(cr);
    cairo_set_line_cap(cr, CAIRO_LINE_CAP_BUTT);
}

/* ------------------------------------------------- dose and distance -- */

typedef struct dd_geom {
    double depth_cm, dist_cm, app_off_cm, angle_deg;
    double tilt_deg;    /* toward the point (NAN: unknown, the highest) */
    double max_dist_cm; /* this beam's distance of the organ's hottest sample */
} dd_geom;

static bool dd_geometry(const sl_estimate_report *r, const sl_beam_place *bp,
                        const sl_organ_dose *d, dd_geom *g)
{
    if (d->landmark || d->organ >= r->loc->norgans) {
        /* measured on the patient: every beam at that distance and depth */
        g->depth_cm = d->min_depth_cm;
        g->dist_cm = g->max_dist_cm = d->min_distance_cm;
        g->app_off_cm = NAN;
        g->angle_deg = NAN;
        g->tilt_deg = NAN;
        return isfinite(g->depth_cm) && isfinite(g->dist_cm);
    }
    const sl_organ_place *pl = &bp->organs[d->organ];
    const sl_organ_samples *s = &r->loc->samples[d->organ];
    if (!pl->placed || pl->nearest >= s->n)
        return false;
    size_t i = pl->nearest;
    g->depth_cm = pl->depth_cm[i];
    g->dist_cm = pl->distance_cm[i];
    g->app_off_cm = pl->app_distance_cm[i] - pl->distance_cm[i];
    sl_vec3 q = sl_frame_to_bld(&bp->frame, s->points[i]);
    double ax = fabs(q.x), ay = fabs(q.y);
    g->angle_deg = ax + ay > 0 ? atan2(ay, ax) * 180 / M_PI : 0;
    g->tilt_deg = sl_beam_tilt_toward(bp, q.x, q.y);
    g->max_dist_cm = d->max_sample < s->n ? pl->distance_cm[d->max_sample] : g->dist_cm;
    return isfinite(g->depth_cm) && isfinite(g->dist_cm);
}

static void list_depths(const double *dp, size_t n, char *buf, size_t size)
{
    size_t len = 0;
    buf[0] = '\0';
    for (size_t i = 0; i < n && len + 24 < size; i++) {
        char v[24];
        fig_format_number(dp[i], v, sizeof v);
        len += (size_t)snprintf(buf + len, size - len, "%s%s", i ? ", " : "", v);
    }
}

static void draw_dose_distance(cairo_t *cr, double w, double h, const void *vctx)
{
    const fig_dd_ctx *ctx = vctx;
    const sl_estimate_report *r = ctx->r;
    const sl_estimate *e = r->est;
    if (ctx->beam >= e->nbeams || ctx->organ >= e->norgans)
        return;
    const sl_beam_dose *bd = &e->beams[ctx->beam];
    const sl_beam_place *bp = bd->place;
    const sl_organ_dose *d = &e->organs[ctx->organ];
    const sl_assessment *a = ctx->organ < r->as->n ? &r->as->items[ctx->organ] : NULL;
    bool mgy = is_fetus(a);
    double unit = mgy ? 10 : 1; /* cGy -> mGy */
    const char *un = mgy ? "mGy" : "cGy";
    double fs = font_for(w, h);
    fig_font f = {fs, false, false}, fb = {fs * 1.1, true, false};
    char buf[600], v1[32], v2[32];
    fig_count(cr, "beam", "%d", bp->beam->number);
    fig_count(cr, "organ", "%zu", ctx->organ);

    dd_geom g;
    if (!d->estimated || !bd->curves || !dd_geometry(r, bp, d, &g)) {
        cairo_set_source_rgb(cr, 0.1, 0.1, 0.1);
        snprintf(buf, sizeof buf, "%s, beam %d: no dose against distance (not estimated)",
                 d->roi->name, bp->beam->number);
        fig_text(cr, 0, 0, 0, 0, buf, f, w);
        return;
    }
    /* the course dose of this beam alone per percent of its reference dose */
    double per_percent = 0;
    for (size_t k = 0; k < e->ngroups; k++)
        if (isfinite(bd->ref_cgy[k]))
            per_percent += e->fractions[k] * bd->ref_cgy[k] / 100;
    per_percent *= unit;

    enum { N = 200 };
    double xs[N], ys[N], lo[N], hi[N];
    double xmax = fmin(fmax(fmax(g.dist_cm, g.max_dist_cm) * 1.25 + 2, 10), SL_MAX_DISTANCE_CM);
    double ymin = INFINITY, ymax = 0, depth_used = NAN;
    unsigned flags = 0;
    for (int i = 0; i < N; i++) {
        xs[i] = xmax * i / (N - 1);
        sl_eval_query q = {g.depth_cm, xs[i], isfinite(g.app_off_cm) ? xs[i] + g.app_off_cm : NAN,
                           g.angle_deg, e->opt.mode, d->shield_transmission, g.tilt_deg,
                           bd->ssd_used_cm};
        sl_model_value mv;
        sl_beam_eval(bd, &q, &mv);
        ys[i] = mv.percent * per_percent;
        hi[i] = (mv.percent + 2 * mv.u_percent) * per_percent;
        lo[i] = (mv.percent - 2 * mv.u_percent) * per_percent;
        if (isfinite(ys[i])) {
            depth_used = mv.depth_used_cm;
            flags |= mv.flags;
            ymin = fmin(ymin, fmax(lo[i], ys[i] * 0.05));
            ymax = fmax(ymax, hi[i]);
        }
    }
    /* this beam at the organ's point nearest its edge: on the curve */
    sl_eval_query q = {g.depth_cm, g.dist_cm, isfinite(g.app_off_cm) ? g.dist_cm + g.app_off_cm : NAN,
                       g.angle_deg, e->opt.mode, d->shield_transmission, g.tilt_deg,
                       bd->ssd_used_cm};
    sl_model_value mv;
    sl_beam_eval(bd, &q, &mv);
    double ynear = mv.percent * per_percent;
    double cmax = d->course_max.cgy * unit, cup = d->course_max.upper_cgy * unit;
    if (isfinite(ynear)) {
        ymin = fmin(ymin, ynear);
        ymax = fmax(ymax, ynear);
    }
    ymin = fmin(ymin, cmax);
    ymax = fmax(ymax, cup);
    for (size_t c = 0; a && c < a->nchecks; c++) {
        double L = a->checks[c].level->dose_gy * 100 * unit;
        ymin = fmin(ymin, L);
        ymax = fmax(ymax, L);
    }
    for (size_t k = 0; a && a->kind && k < a->kind->nbands; k++)
        if (isfinite(a->kind->bands[k].below_gy)) {
            double L = a->kind->bands[k].below_gy * 100 * unit;
            ymin = fmin(ymin, L);
            ymax = fmax(ymax, L);
        }
    if (!(ymin > 0) || !isfinite(ymin))
        ymin = ymax > 0 ? ymax * 1e-3 : 1e-3;
    if (!(ymax > 0))
        ymax = 1;

    /* text above: what is drawn, at which depth, which depths the model has */
    const double *dp = NULL;
    size_t nd = sl_curves_depths(bd->curves, &dp);
    char dl[256];
    list_depths(dp, nd, dl, sizeof dl);
    fig_format_number(g.depth_cm, v1, sizeof v1);
    snprintf(buf, sizeof buf, "%s: beam %d alone, course dose against distance at %s cm depth",
             d->roi->name, bp->beam->number, v1);
    double tw, th, y = 0;
    cairo_set_source_rgb(cr, 0.1, 0.1, 0.1);
    fig_text_size(cr, buf, fb, w, &tw, &th);
    fig_text(cr, 0, y, 0, 0, buf, fb, w);
    y += th + 1;
    char sub[700];
    fig_format_number(depth_used, v2, sizeof v2);
    bool lower = nd && g.depth_cm < dp[0], upper = nd && g.depth_cm > dp[nd - 1];
    if (flags & SL_MF_DEPTH_OUTSIDE || lower || upper)
        snprintf(sub, sizeof sub,
                 "The organ's depth (at its point nearest the field edge) lies outside the "
                 "commissioned depths (%s cm): the model used the nearest, %s cm.",
                 dl, v2);
    else
        snprintf(sub, sizeof sub,
                 "The organ's depth at its point nearest the field edge; commissioned depths "
                 "%s cm (log dose interpolated between them).",
                 dl);
    fig_text_size(cr, sub, f, w, &tw, &th);
    fig_text(cr, 0, y, 0, 0, sub, f, w);
    y += th + 3;

    /* text below: the markers */
    char m1[300], m2[300], m3[200];
    fig_format_number(ynear, v1, sizeof v1);
    fig_format_number(g.dist_cm, v2, sizeof v2);
    snprintf(m1, sizeof m1, "\u25CB this beam at %s's point nearest the field edge (%s cm): %s %s",
             d->roi->name, v2, v1, un);
    fig_format_number(cmax, v1, sizeof v1);
    fig_format_number(cup, v2, sizeof v2);
    sl_status_kind st = a ? a->status : SL_ST_NOT_ASSESSED;
    snprintf(m2, sizeof m2,
             "%s %s course maximum, all beams: %s %s (upper bound k = 2: %s %s, the bar)",
             fig_status_symbol(st), d->roi->name, v1, un, v2, un);
    snprintf(m3, sizeof m3, "band: 2 standard uncertainties; dashed: action levels; dotted: tops of "
             "risk bands (%s)", un);
    double h1, h2, h3;
    fig_text_size(cr, m1, f, w, &tw, &h1);
    fig_text_size(cr, m2, f, w, &tw, &h2);
    fig_text_size(cr, m3, f, w, &tw, &h3);
    double below = h1 + h2 + h3 + 4;

    fig_axes ax = {fs * 6, y + fs * 0.6, 0, 0, 0, xmax, 0, 0, true};
    ax.w = w - ax.x - fs;
    ax.h = h - ax.y - fs * 3.4 - below;
    if (ax.h < 30 || ax.w < 30)
        return;
    fig_log_range(ymin, ymax * 1.05, &ax.y0, &ax.y1);
    char ylab[48];
    snprintf(ylab, sizeof ylab, "course dose (%s)", un);
    fig_axes_draw(cr, &ax, "distance from the field edge (cm)", ylab, true, true, fs);

    cairo_save(cr);
    cairo_rectangle(cr, ax.x, ax.y, ax.w, ax.h);
    cairo_clip(cr);
    size_t nb = band_path(cr, &ax, xs, lo, hi, N);
    cairo_set_source_rgba(cr, fit_rgb[0], fit_rgb[1], fit_rgb[2], 0.18);
    cairo_fill(cr);
    size_t nc = line_path(cr, &ax, xs, ys, N);
    set_rgb(cr, fit_rgb);
    cairo_set_line_width(cr, 1.6);
    cairo_stroke(cr);
    fig_count(cr, "curve", "%zu", nc);
    fig_count(cr, "band", "%zu", nb);
    /* the commissioned distances end here: beyond, the tail is held */
    double rlo, rhi;
    sl_curves_range(bd->curves, &rlo, &rhi);
    if (rhi < xmax) {
        double px = fig_ax_x(&ax, rhi), dsh[2] = {1, 2};
        cairo_set_dash(cr, dsh, 2, 0);
        cairo_set_source_rgb(cr, 0.4, 0.4, 0.4);
        cairo_set_line_width(cr, 0.8);
        cairo_move_to(cr, px, ax.y);
        cairo_line_to(cr, px, ax.y + ax.h);
        cairo_stroke(cr);
        cairo_set_dash(cr, NULL, 0, 0);
        fig_format_number(rhi, v1, sizeof v1);
        snprintf(buf, sizeof buf, "measured to %s cm", v1);
        fig_font fsm = {fs * 0.85, false, true};
        fig_text_size(cr, buf, fsm, 0, &tw, &th);
        bool left = px + 3 + tw > ax.x + ax.w;
        fig_text(cr, left ? px - 3 : px + 3, ax.y + 2, left ? 1 : 0, 0, buf, fsm, 0);
    }
    /* action levels: dashed lines, labelled with their value in the axis unit */
    double last_label_y = -INFINITY;
    size_t nlevels = 0;
    for (size_t c = 0; a && c < a->nchecks; c++) {
        const sl_level *L = a->checks[c].level;
        double lv = L->dose_gy * 100 * unit, py = fig_ax_y(&ax, lv);
        double dsh[2] = {5, 3};
        cairo_set_dash(cr, dsh, 2, 0);
        set_rgb(cr, level_rgb);
        cairo_set_line_width(cr, 1.1);
        cairo_move_to(cr, ax.x, py);
        cairo_line_to(cr, ax.x + ax.w, py);
        cairo_stroke(cr);
        cairo_set_dash(cr, NULL, 0, 0);
        fig_format_number(lv, v1, sizeof v1);
        snprintf(buf, sizeof buf, "%s %s: %s", v1, un, L->name);
        fig_font fl = {fs * 0.9, false, false};
        fig_text_size(cr, buf, fl, 0, &tw, &th);
        double ly = py - th - 1;
        if (fabs(ly - last_label_y) < th) /* too close to the one before: below its line */
            ly = py + 1;
        cairo_set_source_rgba(cr, 1, 1, 1, 0.8);
        /* a long name is cut with an ellipsis; the value comes first and stays */
        fig_text_size(cr, buf, fl, -(ax.w - 6), &tw, &th);
        cairo_rectangle(cr, ax.x + ax.w - 3 - tw, ly, tw, th);
        cairo_fill(cr);
        set_rgb(cr, level_rgb);
        fig_text(cr, ax.x + ax.w - 3, ly, 1, 0, buf, fl, -(ax.w - 6));
        last_label_y = ly;
        nlevels++;
    }
    fig_count(cr, "levels", "%zu", nlevels);
    /* a device's risk bands: their upper edges, dotted, named by band */
    size_t nedges = 0;
    for (size_t k = 0; a && a->kind && k < a->kind->nbands; k++) {
        const sl_band *bd_ = &a->kind->bands[k];
        if (!isfinite(bd_->below_gy))
            continue;
        double lv = bd_->below_gy * 100 * unit, py = fig_ax_y(&ax, lv);
        double dsh[2] = {1.5, 2.5};
        cairo_set_dash(cr, dsh, 2, 0);
        set_rgb(cr, level_rgb);
        cairo_set_line_width(cr, 1.1);
        cairo_move_to(cr, ax.x, py);
        cairo_line_to(cr, ax.x + ax.w, py);
        cairo_stroke(cr);
        cairo_set_dash(cr, NULL, 0, 0);
        fig_format_number(lv, v1, sizeof v1);
        snprintf(buf, sizeof buf, "%s %s: top of risk band '%s'", v1, un, bd_->name);
        fig_font fl = {fs * 0.9, false, false};
        fig_text_size(cr, buf, fl, -(ax.w - 6), &tw, &th);
        double ly = py - th - 1;
        if (fabs(ly - last_label_y) < th)
            ly = py + 1;
        cairo_set_source_rgba(cr, 1, 1, 1, 0.8);
        cairo_rectangle(cr, ax.x + ax.w - 3 - tw, ly, tw, th);
        cairo_fill(cr);
        set_rgb(cr, level_rgb);
        fig_text(cr, ax.x + ax.w - 3, ly, 1, 0, buf, fl, -(ax.w - 6));
        last_label_y = ly;
        nedges++;
    }
    fig_count(cr, "band-edges", "%zu", nedges);
    /* the organ: this beam at its nearest point, and its course maximum */
    double srgb[3];
    fig_status_rgb(st, srgb);
    if (isfinite(ynear)) {
        cairo_arc(cr, fig_ax_x(&ax, g.dist_cm), fig_ax_y(&ax, ynear), fs * 0.45, 0, 2 * M_PI);
        cairo_close_path(cr);
        cairo_set_source_rgb(cr, 1, 1, 1);
        cairo_fill_preserve(cr);
        set_rgb(cr, fit_rgb);
        cairo_set_line_width(cr, 1.4);
        cairo_stroke(cr);
    }
    double mx = fig_ax_x(&ax, fmin(fmax(g.max_dist_cm, 0), xmax));
    set_rgb(cr, srgb);
    cairo_set_line_width(cr, 1.2);
    cairo_move_to(cr, mx, fig_ax_y(&ax, cmax));
    cairo_line_to(cr, mx, fig_ax_y(&ax, cup));
    cairo_move_to(cr, mx - fs * 0.4, fig_ax_y(&ax, cup));
    cairo_line_to(cr, mx + fs * 0.4, fig_ax_y(&ax, cup));
    cairo_stroke(cr);
    fig_text(cr, mx, fig_ax_y(&ax, cmax), 0.5, 0.5, fig_status_symbol(st),
             (fig_font){fs * 1.3, false, false}, 0);
    cairo_restore(cr);

    y = ax.y + ax.h + fs * 3.2;
    cairo_set_source_rgb(cr, 0.1, 0.1, 0.1);
    fig_text(cr, 0, y, 0, 0, m1, f, w);
    y += h1;
    set_rgb(cr, srgb);
    fig_text(cr, 0, y, 0, 0, m2, f, w);
    y += h2;
    cairo_set_source_rgb(cr, 0.1, 0.1, 0.1);
    fig_text(cr, 0, y, 0, 0, m3, f, w);
}

/* ------------------------------------------------------------------ DVH -- */

static void draw_dvh(cairo_t *cr, double w, double h, const void *vctx)
{
    const fig_dvh_ctx *ctx = vctx;
    const sl_estimate_report *r = ctx->r;
    const sl_estimate *e = r->est;
    if (ctx->organ >= e->norgans)
        return;
    const sl_organ_dose *d = &e->organs[ctx->organ];
    const sl_assessment *a = ctx->organ < r->as->n ? &r->as->items[ctx->organ] : NULL;
    double fs = font_for(w, h);
    fig_font f = {fs, false, false}, fb = {fs * 1.1, true, false};
    bool mgy = is_fetus(a);
    double unit = mgy ? 10 : 1;
    const char *un = mgy ? "mGy" : "cGy";
    char buf[400], v1[32];
    if (!d->estimated || d->is_point || d->landmark || d->organ >= r->loc->norgans ||
        r->loc->samples[d->organ].n < 2 || !d->course_cgy) {
        cairo_set_source_rgb(cr, 0.1, 0.1, 0.1);
        snprintf(buf, sizeof buf, "%s: no dose-volume histogram (%s)", d->roi->name,
                 d->estimated ? "a point" : "not estimated");
        fig_text(cr, 0, 0, 0, 0, buf, f, w);
        return;
    }
    const sl_organ_samples *s = &r->loc->samples[d->organ];
    size_t n = s->n;
    fig_count(cr, "organ", "%zu", ctx->organ);
    fig_dv *arr = malloc(2 * n * sizeof *arr);
    uint64_t *keys = malloc(2 * n * sizeof *keys);
    double *xs = malloc((2 * n + 2) * sizeof *xs), *ys = malloc((2 * n + 2) * sizeof *ys);
    if (!arr || !keys || !xs || !ys) {
        free(arr);
        free(keys);
        free(xs);
        free(ys);
        return;
    }
    double vt = 0;
    for (size_t i = 0; i < n; i++) {
        arr[i] = (fig_dv){d->course_cgy[i] * unit, s->volume_cc[i]};
        vt += s->volume_cc[i];
    }
    fig_dv_sort_desc(arr, arr + n, keys, keys + n, n);
    free(keys);
    /* the cumulative histogram as steps: the volume at or above each dose,
     * from the highest dose down; each distinct dose is a step */
    size_t m = 0, steps = 0;
    double acc = 0;
    xs[m] = arr[0].d;
    ys[m++] = 0;
    for (size_t i = 0; i < n; i++) {
        acc += arr[i].v;
        if (i + 1 == n || arr[i + 1].d < arr[i].d) {
            double vol = vt > 0 ? 100 * acc / vt : 100;
            xs[m] = arr[i].d;
            ys[m++] = vol;
            steps++;
            if (i + 1 < n) {
                xs[m] = arr[i + 1].d;
                ys[m++] = vol;
            }
        }
    }
    xs[m] = 0;
    ys[m] = ys[m - 1];
    m++;
    double dmax = arr[0].d;
    free(arr);

    snprintf(buf, sizeof buf, "%s: dose-volume histogram (course, all beams)", d->roi->name);
    double tw, th;
    cairo_set_source_rgb(cr, 0.1, 0.1, 0.1);
    fig_text_size(cr, buf, fb, w, &tw, &th);
    fig_text(cr, 0, 0, 0, 0, buf, fb, w);
    /* levels within reach of the doses are drawn; others are named below */
    char off[300] = "";
    size_t offlen = 0;
    double xhi = dmax > 0 ? dmax * 1.08 : 1;
    for (size_t c = 0; a && c < a->nchecks; c++) {
        double lv = a->checks[c].level->dose_gy * 100 * unit;
        if (lv <= dmax * 2)
            xhi = fmax(xhi, lv * 1.08);
        else if (offlen < sizeof off) {
            fig_format_number(lv, v1, sizeof v1);
            offlen += (size_t)snprintf(off + offlen, sizeof off - offlen, "%s%s %s", offlen ? ", " : "",
                                       v1, un);
        }
    }
    char foot[400] = "";
    if (offlen)
        snprintf(foot, sizeof foot, "action level%s beyond the axis: %s", strchr(off, ',') ? "s" : "",
                 off);
    double fh = 0;
    if (foot[0])
        fig_text_size(cr, foot, f, w, &tw, &fh);
    fig_axes ax = {fs * 5.2, th + fs * 0.8, 0, 0, 0, xhi, 0, 105, false};
    ax.w = w - ax.x - fs * 1.5;
    ax.h = h - ax.y - fs * 3.4 - fh;
    if (ax.h < 20 || ax.w < 20) {
        free(xs);
        free(ys);
        return;
    }
    char xl[48];
    snprintf(xl, sizeof xl, "course dose (%s)", un);
    fig_axes_draw(cr, &ax, xl, "volume (%)", true, true, fs);
    cairo_save(cr);
    cairo_rectangle(cr, ax.x, ax.y, ax.w, ax.h);
    cairo_clip(cr);
    for (size_t c = 0; a && c < a->nchecks; c++) {
        double lv = a->checks[c].level->dose_gy * 100 * unit;
        if (lv > dmax * 2)
            continue;
        double px = fig_ax_x(&ax, lv), dsh[2] = {5, 3};
        cairo_set_dash(cr, dsh, 2, 0);
        set_rgb(cr, level_rgb);
        cairo_set_line_width(cr, 1.1);
        cairo_move_to(cr, px, ax.y);
        cairo_line_to(cr, px, ax.y + ax.h);
        cairo_stroke(cr);
        cairo_set_dash(cr, NULL, 0, 0);
        fig_format_number(lv, v1, sizeof v1);
        snprintf(buf, sizeof buf, "%s %s", v1, un);
        fig_text(cr, px - 2, ax.y + 2, 1, 0, buf, (fig_font){fs * 0.9, false, false}, 0);
    }
    double srgb[3];
    fig_status_rgb(a ? a->status : SL_ST_NOT_ASSESSED, srgb);
    /* thousands of steps closer than a quarter point apart look like one
     * line: keep a vertex where the line has moved that far, and the ends */
    size_t k = 0;
    double lx = NAN, ly = NAN;
    cairo_new_path(cr);
    for (size_t i = 0; i < m; i++) {
        double px = fig_ax_x(&ax, xs[i]), py = fig_ax_y(&ax, ys[i]);
        if (i == 0 || i + 1 == m || fabs(px - lx) >= 0.25 || fabs(py - ly) >= 0.25) {
            if (k++ == 0)
                cairo_move_to(cr, px, py);
            else
                cairo_line_to(cr, px, py);
            lx = px;
            ly = py;
        }
    }
    fig_path_thin(cr);
    set_rgb(cr, srgb);
    cairo_set_line_width(cr, 1.6);
    cairo_stroke(cr);
    cairo_restore(cr);
    fig_count(cr, "dvh-steps", "%zu", steps);
    fig_count(cr, "dvh-vertices", "%zu", k);
    fig_count(cr, "samples", "%zu", n);
    /* the curve's ends, for a check against the organ's maximum and its
     * whole volume: the highest dose drawn and the volume reached at 0 */
    fig_count(cr, "dvh-max", "%.6g", dmax);
    fig_count(cr, "dvh-volume", "%.6g", ys[m - 1]);
    if (foot[0]) {
        set_rgb(cr, level_rgb);
        fig_text(cr, 0, h - fh, 0, 0, foot, f, w);
    }
    free(xs);
    free(ys);
}

/* ------------------------------------------------------- fit profiles -- */

static bool same_data(const sl_profile_data *d, const sl_model_profile *p)
{
    return d->n == p->n && d->energy_mev == p->energy_mev &&
           strcmp(d->applicator, p->applicator) == 0 && strcmp(d->insert, p->insert) == 0 &&
           d->depth_cm == p->depth_cm && strcmp(d->direction, p->direction) == 0 &&
           d->tilt_deg == p->tilt_deg && d->ssd_cm == p->ssd_cm;
}

/* The small multiples of one energy and applicator: a column a depth, a row
 * a (insert, direction, SSD, tilt), so that down a column the curve moves
 * with tilt and SSD and along a row with depth. */
static bool same_row(const sl_model_profile *a, const sl_model_profile *b)
{
    return strcmp(a->insert, b->insert) == 0 && strcmp(a->direction, b->direction) == 0 &&
           a->ssd_cm == b->ssd_cm && a->tilt_deg == b->tilt_deg;
}

static int cmp_row(const sl_model_profile *a, const sl_model_profile *b)
{
    bool ao = strcmp(a->insert, SL_INSERT_OPEN) == 0, bo = strcmp(b->insert, SL_INSERT_OPEN) == 0;
    if (ao != bo)
        return ao ? -1 : 1;
    int c = strcmp(a->insert, b->insert);
    if (c)
        return c;
    c = strcmp(a->direction, b->direction);
    if (c)
        return c;
    if (a->ssd_cm != b->ssd_cm)
        return a->ssd_cm < b->ssd_cm ? -1 : 1;
    if (a->tilt_deg != b->tilt_deg)
        return a->tilt_deg < b->tilt_deg ? -1 : 1;
    return 0;
}

/* Rows and columns of the grid, and each profile's place (row[k], col[k] for
 * the k-th profile of the energy and applicator, idx[k] its index). */
static void profile_grid(const sl_model *m, const size_t *idx, size_t n, size_t *row,
                         size_t *col, size_t *nrows, size_t *ncols, size_t *row_first)
{
    double depths[64];
    size_t nd = 0;
    *nrows = 0;
    for (size_t k = 0; k < n; k++) {
        const sl_model_profile *p = &m->profiles[idx[k]];
        /* depths, increasing */
        size_t i = 0;
        while (i < nd && depths[i] < p->depth_cm)
            i++;
        if ((i == nd || depths[i] != p->depth_cm) && nd < 64) {
            memmove(depths + i + 1, depths + i, (nd - i) * sizeof *depths);
            depths[i] = p->depth_cm;
            nd++;
        }
    }
    /* rows in order: row_first[r] is a profile (k) of row r */
    for (size_t k = 0; k < n; k++) {
        const sl_model_profile *p = &m->profiles[idx[k]];
        size_t r = 0;
        while (r < *nrows && cmp_row(&m->profiles[idx[row_first[r]]], p) < 0)
            r++;
        if (r < *nrows && same_row(&m->profiles[idx[row_first[r]]], p))
            continue;
        memmove(row_first + r + 1, row_first + r, (*nrows - r) * sizeof *row_first);
        row_first[r] = k;
        (*nrows)++;
    }
    for (size_t k = 0; k < n; k++) {
        const sl_model_profile *p = &m->profiles[idx[k]];
        row[k] = 0;
        while (row[k] < *nrows && !same_row(&m->profiles[idx[row_first[row[k]]]], p))
            row[k]++;
        col[k] = 0;
        while (col[k] < nd && depths[col[k]] != p->depth_cm)
            col[k]++;
        if (col[k] >= nd)
            col[k] = nd ? nd - 1 : 0;
    }
    *ncols = nd ? nd : 1;
}

size_t fig_profiles_rows(const sl_model *m, double energy_mev, const char *applicator,
                         size_t *ncols)
{
    size_t n = 0, nrows = 0;
    *ncols = 1;
    size_t *idx = malloc((m->nprofiles + 1) * 4 * sizeof *idx);
    if (!idx)
        return 1;
    for (size_t i = 0; i < m->nprofiles; i++)
        if (m->profiles[i].energy_mev == energy_mev &&
            strcmp(m->profiles[i].applicator, applicator) == 0)
            idx[n++] = i;
    size_t *row = idx + m->nprofiles + 1, *col = row + m->nprofiles + 1,
           *first = col + m->nprofiles + 1;
    profile_grid(m, idx, n, row, col, &nrows, ncols, first);
    free(idx);
    return nrows ? nrows : 1;
}

static const sl_profile_data *data_for(const sl_measurement_set *ms, size_t i,
                                       const sl_model_profile *p)
{
    if (!ms)
        return NULL;
    /* the model keeps the measurement set's order; check it is the same */
    if (i < ms->nprofiles) {
        const sl_profile_data *d = &ms->profiles[i];
        if (same_data(d, p))
            return d;
    }
    for (size_t k = 0; k < ms->nprofiles; k++) {
        const sl_profile_data *d = &ms->profiles[k];
        if (same_data(d, p))
            return d;
    }
    return NULL;
}

static void draw_profiles(cairo_t *cr, double w, double h, const void *vctx)
{
    const fig_profiles_ctx *ctx = vctx;
    const sl_model *m = ctx->m;
    size_t *idx = malloc((m->nprofiles + 1) * 4 * sizeof *idx);
    if (!idx)
        return;
    size_t *prow = idx + m->nprofiles + 1, *pcol = prow + m->nprofiles + 1,
           *row_first = pcol + m->nprofiles + 1;
    size_t n = 0;
    double xmax = 1, ymin = INFINITY, ymax = 0;
    for (size_t i = 0; i < m->nprofiles; i++) {
        const sl_model_profile *p = &m->profiles[i];
        if (p->energy_mev != ctx->energy_mev || strcmp(p->applicator, ctx->applicator) != 0)
            continue;
        idx[n++] = i;
        xmax = fmax(xmax, p->fit.range_hi_cm * 1.02);
        for (size_t k = 0; k < p->n; k++)
            if (p->dose_percent[k] > 0) {
                ymin = fmin(ymin, p->dose_percent[k]);
                ymax = fmax(ymax, p->dose_percent[k]);
            }
    }
    double fs = fmin(fmax(fmin(w, h) / 70, 5.5), 8);
    fig_font f = {fs, false, false}, fb = {fs * 1.3, true, false};
    char buf[300], e1[32];
    fig_format_number(ctx->energy_mev, e1, sizeof e1);
    snprintf(buf, sizeof buf,
             "%s MeV, applicator %s: %zu profile%s, a column a depth, a row an insert, "
             "direction, SSD and tilt. Points: measured, bars 2 sigma; line: fit, "
             "band 2 sigma; below each: residual / sigma (dashed at 0 and \u00B13); red frame: "
             "a poor fit",
             e1, ctx->applicator, n, n == 1 ? "" : "s");
    double tw, th;
    cairo_set_source_rgb(cr, 0.1, 0.1, 0.1);
    fig_text_size(cr, buf, fb, w, &tw, &th);
    fig_text(cr, 0, 0, 0, 0, buf, fb, w);
    if (n == 0) {
        free(idx);
        return;
    }
    double y0, y1;
    fig_log_range(ymin * 0.7, ymax * 1.3, &y0, &y1);
    /* the grid: a column a depth, a row an insert, direction, SSD and tilt */
    double top = th + 4, left = fs * 5.5, bottom = fs * 5;
    double aw = w - left - fs, ah = h - top - bottom;
    size_t cols = 1, rows = 1;
    profile_grid(m, idx, n, prow, pcol, &rows, &cols, row_first);
    for (size_t r = 0; r < rows; r++)
        row_first[r] = idx[row_first[r]]; /* a profile of each row, by its model index */
    /* a page may hold some of the rows only */
    size_t r0 = ctx->row_count ? ctx->row_from : 0;
    size_t nr = ctx->row_count ? ctx->row_count : rows;
    if (r0 >= rows)
        r0 = rows ? rows - 1 : 0;
    if (r0 + nr > rows)
        nr = rows - r0;
    {
        size_t kept = 0;
        for (size_t k = 0; k < n; k++) {
            if (prow[k] < r0 || prow[k] >= r0 + nr)
                continue;
            idx[kept] = idx[k];
            prow[kept] = prow[k] - r0;
            pcol[kept] = pcol[k];
            kept++;
        }
        n = kept;
        memmove(row_first, row_first + r0, nr * sizeof *row_first);
        rows = nr ? nr : 1;
    }
    double pw = aw / (double)cols, ph = ah / (double)rows;
    double gapx = fs * 1.2, gapy = fs * 1.8;
    /* the row's name above its first column */
    for (size_t r = 0; r < rows; r++) {
        const sl_model_profile *p = &m->profiles[row_first[r]];
        char ssd[32], tilt[32];
        fig_format_number(p->ssd_cm, ssd, sizeof ssd);
        fig_format_number(p->tilt_deg, tilt, sizeof tilt);
        snprintf(buf, sizeof buf, "%s %s, SSD %s cm, tilt %s%s deg", p->insert, p->direction,
                 ssd, p->tilt_deg > 0 ? "+" : "", tilt);
        cairo_set_source_rgb(cr, 0.1, 0.1, 0.1);
        fig_text(cr, left, top + (double)r * ph, 0, 0, buf, (fig_font){fs * 1.05, true, false},
                 -aw);
    }
    size_t total_pts = 0;
    char *counts = malloc(n * 24 + 1);
    size_t clen = 0;
    if (counts)
        counts[0] = '\0';
    for (size_t k = 0; k < n; k++) {
        const sl_model_profile *p = &m->profiles[idx[k]];
        const sl_profile_data *d = data_for(ctx->ms, idx[k], p);
        size_t row = prow[k], col = pcol[k];
        double px0 = left + (double)col * pw, py0 = top + (double)row * ph + fs * 1.4;
        double inner = ph - gapy - fs * 2.8;
        fig_axes main = {px0, py0 + fs * 1.4, pw - gapx, inner * 0.72, 0, xmax, y0, y1, true};
        fig_axes res = {px0, main.y + main.h + fs * 0.9, main.w, inner * 0.28 - fs * 0.9, 0, xmax,
                        -4.5, 4.5, false};
        char dep[32];
        fig_format_number(p->depth_cm, dep, sizeof dep);
        snprintf(buf, sizeof buf, "%zu. %s cm%s", idx[k] + 1, dep, p->fit.poor ? ": POOR" : "");
        if (p->fit.poor)
            set_rgb(cr, data_rgb);
        else
            cairo_set_source_rgb(cr, 0.1, 0.1, 0.1);
        fig_text(cr, px0, py0, 0, 0, buf, (fig_font){fs * 1.05, p->fit.poor, false}, -main.w);
        bool last_row = true; /* no panel below it in its column */
        for (size_t k2 = 0; k2 < n; k2++)
            if (pcol[k2] == col && prow[k2] > row)
                last_row = false;
        fig_axes_draw(cr, &main, NULL, col == 0 ? "dose (% of CAX max)" : NULL, false, col == 0,
                      fs);
        /* shared axes: distances are numbered under the lowest panel of each column */
        /* its name once, under the first column: the panels are narrow */
        fig_axes_draw(cr, &res,
                      last_row && col == 0 ? "distance from the field edge (cm)" : NULL, NULL,
                      last_row, false, fs);
        if (col == 0) { /* the residual strip's scale: its 0 and 3 sigma lines */
            cairo_set_source_rgb(cr, 0.1, 0.1, 0.1);
            fig_font ft = {fs * 0.85, false, false};
            fig_text(cr, res.x - 2, fig_ax_y(&res, 3), 1, 0.5, "+3\u03C3", ft, 0);
            fig_text(cr, res.x - 2, fig_ax_y(&res, 0), 1, 0.5, "0", ft, 0);
            fig_text(cr, res.x - 2, fig_ax_y(&res, -3), 1, 0.5, "\u22123\u03C3", ft, 0);
        }
        if (p->fit.poor) { /* a poor fit: a red frame as well as the word */
            set_rgb(cr, data_rgb);
            cairo_set_line_width(cr, 1.6);
            cairo_rectangle(cr, main.x, main.y, main.w, main.h);
            cairo_stroke(cr);
        }
        cairo_save(cr);
        cairo_rectangle(cr, main.x, main.y, main.w, main.h);
        cairo_clip(cr);
        enum { NC = 120 };
        double xs[NC], ys[NC], lo[NC], hi[NC];
        for (int i = 0; i < NC; i++) {
            double u;
            xs[i] = p->fit.range_hi_cm * 1.02 * i / (NC - 1);
            ys[i] = sl_profile_fit_eval(&p->fit, xs[i], &u);
            lo[i] = ys[i] - 2 * u;
            hi[i] = ys[i] + 2 * u;
        }
        band_path(cr, &main, xs, lo, hi, NC);
        cairo_set_source_rgba(cr, fit_rgb[0], fit_rgb[1], fit_rgb[2], 0.2);
        cairo_fill(cr);
        line_path(cr, &main, xs, ys, NC);
        set_rgb(cr, fit_rgb);
        cairo_set_line_width(cr, 1.0);
        cairo_stroke(cr);
        /* error bars, then every point of the profile as one path of dots */
        if (d) {
            cairo_set_line_width(cr, 0.6);
            set_rgb(cr, data_rgb);
            for (size_t i = 0; i < p->n; i++) {
                double x = fig_ax_x(&main, p->distance_cm[i]);
                double lo2 = fmax(p->dose_percent[i] - 2 * d->sigma_percent[i], y0 * 0.5);
                cairo_move_to(cr, x, fig_ax_y(&main, lo2));
                cairo_line_to(cr, x, fig_ax_y(&main, p->dose_percent[i] + 2 * d->sigma_percent[i]));
            }
            cairo_stroke(cr);
        }
        cairo_new_path(cr);
        for (size_t i = 0; i < p->n; i++)
            dot(cr, fig_ax_x(&main, p->distance_cm[i]),
                fig_ax_y(&main, fmax(p->dose_percent[i], y0 * 0.5)));
        set_rgb(cr, data_rgb);
        dots_stroke(cr, fs * 0.5);
        cairo_restore(cr);
        /* residuals */
        cairo_save(cr);
        cairo_rectangle(cr, res.x, res.y, res.w, res.h);
        cairo_clip(cr);
        double dsh[2] = {2, 2};
        cairo_set_dash(cr, dsh, 2, 0);
        cairo_set_source_rgb(cr, 0.4, 0.4, 0.4);
        cairo_set_line_width(cr, 0.5);
        for (int k3 = -1; k3 <= 1; k3++) {
            cairo_move_to(cr, res.x, fig_ax_y(&res, 3.0 * k3));
            cairo_line_to(cr, res.x + res.w, fig_ax_y(&res, 3.0 * k3));
        }
        cairo_stroke(cr);
        cairo_set_dash(cr, NULL, 0, 0);
        if (d) {
            cairo_new_path(cr);
            for (size_t i = 0; i < p->n; i++) {
                double fv = sl_profile_value(p->fit.form, p->fit.theta, p->distance_cm[i], NULL,
                                             NULL, NULL);
                double rv = (p->dose_percent[i] - fv) / d->sigma_percent[i];
                /* beyond the strip: drawn on its edge */
                double rc = fmin(fmax(rv, -4.3), 4.3);
                dot(cr, fig_ax_x(&res, p->distance_cm[i]), fig_ax_y(&res, rc));
            }
            set_rgb(cr, fit_rgb);
            dots_stroke(cr, fs * 0.45);
        }
        cairo_restore(cr);
        total_pts += p->n;
        if (counts)
            clen += (size_t)snprintf(counts + clen, 24, "%s%zu", k ? "," : "", p->n);
    }
    /* shared axis labels */
    cairo_set_source_rgb(cr, 0.1, 0.1, 0.1);
    fig_count(cr, "panels", "%zu", n);
    fig_count(cr, "points", "%s", counts ? counts : "");
    fig_count(cr, "points-total", "%zu", total_pts);
    (void)f;
    free(counts);
    free(idx);
}

/* The public entry (fig_boxed: the caller's page is left as it was). */
void fig_dose_distance(cairo_t *cr, double w, double h, const void *ctx)
{
    fig_boxed(cr, w, h, draw_dose_distance, ctx);
}

/* The public entry (fig_boxed: the caller's page is left as it was). */
void fig_dvh(cairo_t *cr, double w, double h, const void *ctx)
{
    fig_boxed(cr, w, h, draw_dvh, ctx);
}

/* The public entry (fig_boxed: the caller's page is left as it was). */
void fig_profiles(cairo_t *cr, double w, double h, const void *ctx)
{
    fig_boxed(cr, w, h, draw_profiles, ctx);
}
