/*
 * Private to the report module: the figures of strayline's reports, drawn
 * once with cairo (text with Pango) and rendered either to an SVG element
 * of an HTML report (fig_svg_into) or onto a PDF page (call the drawing
 * function on the page's cairo context, translated to where the figure
 * goes). One drawing code for both, so the HTML and the PDF show the same
 * picture; no SVG is assembled by hand anywhere.
 *
 * A drawing function draws into the box (0, 0)-(w_pt, h_pt) in points
 * (1/72 inch) and never outside it. It may record how many data items it
 * drew (fig_count), which fig_svg_into writes as the svg element's
 * data-counts attribute, so that tests can check that no figure's data were
 * cut.
 */
#ifndef STRAYLINE_REPORT_FIGURE_H
#define STRAYLINE_REPORT_FIGURE_H

#include <stdbool.h>
#include <stddef.h>
#include <stdint.h>

#include <cairo.h>

#include "html.h"
#include "strayline/report.h"

typedef void (*fig_draw_fn)(cairo_t *cr, double w_pt, double h_pt, const void *ctx);

/* Draw a figure in its own cairo state, clipped to (0, 0)-(w, h) on a white
 * box, so that a caller's page (PDF) is left as it was and nothing is drawn
 * outside the box: every public figure entry goes through it. */
void fig_boxed(cairo_t *cr, double w, double h, fig_draw_fn draw, const void *ctx);

/* Render a figure to an SVG document in memory (caller frees *svg). */
sl_status fig_svg_string(double w_pt, double h_pt, fig_draw_fn draw, const void *ctx, char **svg,
                         size_t *len, sl_error *err);

/* Render a figure and insert its <svg> element under parent. The ids cairo
 * gives its definitions (glyphs, clip paths) are prefixed per figure, so
 * that several figures in one page do not clash. Returns the element, or
 * NULL with h->failed set. */
xmlNodePtr fig_svg_into(hdoc *h, xmlNodePtr parent, double w_pt, double h_pt, fig_draw_fn draw,
                        const void *ctx);

/* The beam's-eye view of one beam: the field and applicator outlines, rings
 * at 1, 2, 5 and 10 cm from the field edge, each organ's projected contours
 * coloured by its status, labels, patient directions on the edges, arrows
 * with the distance to organs outside the picture, a legend (to the right
 * when w >= 1.25 h, else below). Reads best at 480 x 360 pt or larger. */
typedef struct fig_bev_ctx {
    const sl_estimate_report *r;
    size_t beam;
} fig_bev_ctx;
void fig_bev(cairo_t *cr, double w, double h, const void *ctx);

/* The dose of one beam against the distance from its field edge, at the
 * depth of one organ's point nearest that edge, with its 2-sigma band, the
 * organ marked and its action levels as lines (cGy; mGy for a fetus).
 * organ indexes r->est->organs and r->as->items. */
typedef struct fig_dd_ctx {
    const sl_estimate_report *r;
    size_t beam;
    size_t organ;
} fig_dd_ctx;
void fig_dose_distance(cairo_t *cr, double w, double h, const void *ctx);

/* The cumulative dose-volume histogram of one organ's course dose, with its
 * action levels as lines. */
typedef struct fig_dvh_ctx {
    const sl_estimate_report *r;
    size_t organ;
} fig_dvh_ctx;
void fig_dvh(cairo_t *cr, double w, double h, const void *ctx);

/* With the planning system's dose (--tps-dose): the ratio model / planning
 * system of the course dose against the distance from the nearest field
 * edge, in the band's bins, a series for every beam together and one for
 * each beam with a dose of its own (figure_tps.c). */
typedef struct fig_tps_ctx {
    const sl_estimate_report *r;
} fig_tps_ctx;
void fig_tps_ratio(cairo_t *cr, double w, double h, const void *ctx);

/* The fit report's small multiples: one panel for each profile (insert,
 * depth, direction) of one energy and applicator: the measured points with
 * 2-sigma bars, the fit and its 2-sigma band, and the normalised residuals.
 * ms may be NULL (no error bars, no residuals). */
typedef struct fig_profiles_ctx {
    const sl_measurement_set *ms;
    const sl_model *m;
    double energy_mev;
    const char *applicator;
    size_t row_from, row_count;   /* the rows drawn (row_count 0: every row) */
} fig_profiles_ctx;
void fig_profiles(cairo_t *cr, double w, double h, const void *ctx);
/* The grid of fig_profiles for one energy and applicator: rows (returned;
 * an insert, direction, SSD and tilt each) and columns (*ncols, a depth
 * each), for sizing the figure. */
size_t fig_profiles_rows(const sl_model *m, double energy_mev, const char *applicator,
                         size_t *ncols);

/* The colour of a status (figures and tables alike), and its shape cue as
 * one UTF-8 character, so that no status is told by colour alone. */
void fig_status_rgb(sl_status_kind s, double rgb[3]);
const char *fig_status_symbol(sl_status_kind s);

/* ------------------------------------------------ drawing helpers -- */

/* The patient directions (DICOM letters L R A P H F, most weighty first,
 * up to three) toward the right and the top of a beam's-eye view of a beam
 * frame. */
/* n points of the ring r cm from an outline, one on each of n rays from
 * the middle of its bounds, evenly spaced in angle (the beam's-eye view's
 * distance rings; cm in the outline's plane). */
void fig_bev_ring_points(const sl_outline *o, double r, sl_vec2 *p, size_t n);

void fig_bev_directions(const sl_frame *f, char right[4], char left[4], char up[4],
                        char down[4]);

/* A number for a person to read: fixed decimals, never an exponent. */
void fig_format_number(double v, char *buf, size_t size);

/* A dose and the volume it stands for (a DVH's input). */
typedef struct fig_dv {
    double d, v;
} fig_dv;

/* Sort by dose, highest first, into the order a stable comparison sort
 * gives (glibc's qsort is a merge sort), ties in their first order; with a
 * NaN among the doses, which has no place in that order, a comparison sort
 * as qsort has it. tmp, key and ktmp: scratch of n each. The comparison
 * sort was a tenth of drawing a report. */
void fig_dv_sort_desc(fig_dv *a, fig_dv *tmp, uint64_t *key, uint64_t *ktmp, size_t n);

/* Thin the straight runs of the current path (Ramer-Douglas-Peucker) to
 * FIG_THIN_TOLERANCE_PT: a vertex goes where the line without it stays
 * within that distance of it; curves, ends and closes stay. A contour of
 * hundreds of points projected into a few centimetres of page looks the
 * same, and its figure is a fraction of the size: writing coordinates was
 * the largest share of a report's drawing time (cairo's SVG writer formats
 * each at about 2700 instructions). The tolerance is a tenth of the widest
 * stroke the figures draw (an organ's outline, 2.4 pt) and a third of a
 * pixel on a screen at 96 dpi; in headless Chromium at twice the size,
 * 0.03 to 0.3 % of a figure's pixels differ from 0.05 pt's, along lines. */
#define FIG_THIN_TOLERANCE_PT 0.25
void fig_path_thin(cairo_t *cr);

/* Record a count of drawn data items under a key ("curve", "points"). */
void fig_count(cairo_t *cr, const char *key, const char *fmt, ...)
#if defined(__GNUC__)
    __attribute__((format(printf, 3, 4)))
#endif
    ;

/* Text with Pango at (x, y), placed by the anchor fractions (ax, ay) of its
 * box (0, 0: top left; 0.5, 0.5: centred); max_w > 0 wraps at that width,
 * max_w < 0 keeps one line of at most -max_w, cut with an ellipsis.
 * fig_text_size measures the same text. */
typedef struct fig_font {
    double size_pt;
    bool bold, italic;
} fig_font;
void fig_text_size(cairo_t *cr, const char *text, fig_font f, double max_w, double *w,
                   double *h);
void fig_text(cairo_t *cr, double x, double y, double ax, double ay, const char *text, fig_font f,
              double max_w);

/* A plot frame: the data ranges mapped into a rectangle (points). */
typedef struct fig_axes {
    double x, y, w, h;       /* plot rectangle */
    double x0, x1, y0, y1;   /* data ranges */
    bool logy;
} fig_axes;

/* Decades around [lo, hi] for a log axis (lo > 0). */
void fig_log_range(double lo, double hi, double *y0, double *y1);
double fig_ax_x(const fig_axes *a, double x);
double fig_ax_y(const fig_axes *a, double y);
/* Grid, ticks with labels, frame and axis labels (either may be NULL;
 * tick labels are left out when ticks is false for that axis). */
void fig_axes_draw(cairo_t *cr, const fig_axes *a, const char *xlabel, const char *ylabel,
                   bool xticks, bool yticks, double font_pt);

#endif
