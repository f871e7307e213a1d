/*
 * strayline: radiochromic film dosimetry, from scanned film to commissioning
 * profiles.
 *
 * Out-of-field profiles are often measured on film. Two steps turn the scans
 * into what `strayline fit` reads:
 *
 *   calibration: pieces of one film lot given known doses are scanned; per
 *   colour channel the robust mean pixel value of a region of each piece
 *   gives the net optical density netOD = log10(PV_unexposed / PV) (AAPM
 *   TG-235; against each piece's own scan before exposure when there is
 *   one), and a curve dose = f(netOD) is fitted with GSL in two published
 *   forms (the power form of Devic et al. 2004 and the rational scanner
 *   response of Lewis et al. 2012), the lower AICc winning, with the
 *   parameter covariance and the lowest dose the calibration resolves;
 *
 *   profiles: each measurement film becomes a dose map, its field is found
 *   (the 50 % level of its central-axis dose, its centre and orientation),
 *   a band across the line through the centre is averaged into a profile,
 *   films of one profile given different monitor units are merged, and the
 *   profiles are written as CSV files with a measurement set.
 *
 * Scans are read with libtiff: 16-bit grey or 48-bit RGB (8-bit accepted
 * with a warning), pixel size from the resolution tags or given. All lengths
 * are cm, doses cGy, angles degrees. The library never prints and never
 * exits; errors name the file and the element.
 */
#ifndef STRAYLINE_FILM_H
#define STRAYLINE_FILM_H

#include <stdbool.h>
#include <stddef.h>
#include <stdint.h>
#include <stdio.h>

#include "strayline/error.h"
#include "strayline/util.h"

#ifdef __cplusplus
extern "C" {
#endif

/* Share of a region's pixels that may be saturated (at the scale's top) or
 * empty (0) before the region is refused. */
#define SL_FILM_MAX_SATURATED_SHARE 0.01
/* Robust mean: pixels farther than this many robust standard deviations
 * (1.4826 x the median absolute deviation) from the median are rejected. */
#define SL_FILM_CLIP_SIGMAS 3.5
/* Films of one profile whose overlap ratio (longer exposure over the
 * shorter, where both read) is farther than this from 1, and beyond 5
 * standard errors, are refused: a wrong MU or reference dose (a strayline
 * setting; within it, beyond 3 % and 3 standard errors, a warning). The
 * standard error counts the cells as independent, not the calibration's
 * bias common to them, which can reach several per cent at the short
 * film's low end: hence a margin well above that. */
#define SL_FILM_OVERLAP_REFUSE 0.25

/* A film's own central-axis dose over its cax_reference_cgy: above
 * SL_FILM_AXIS_MAX_REL, or below SL_FILM_AXIS_MIN_REL at a depth no deeper
 * than 0.8 R50 (R50 = E / 2.33 cm, IAEA TRS-398), is refused: the
 * calibration or the reference is in another unit or for other MU. */
#define SL_FILM_AXIS_MAX_REL 1.2
#define SL_FILM_AXIS_MIN_REL 0.4
/* ... half that lower limit for an insert whose profiles are relative to
 * the open field's maximum (profiles_relative_to: open_cax, which carry its
 * cutout factor), and beyond this tilt (deg), where oblique incidence draws
 * the depth dose toward the surface (common practice), the lower limit only
 * as deep as the depth of maximum. */
#define SL_FILM_AXIS_TILT_DEG 30.0
/* Largest scan read (pixels), so that a hostile header cannot exhaust memory. */
#define SL_FILM_MAX_PIXELS ((size_t)1 << 25) /* 33.5 million: 25 x 20 cm at 600 dpi */

/* ---------------------------------------------------------- scans -- */

enum { SL_FILM_RED = 0, SL_FILM_GREEN = 1, SL_FILM_BLUE = 2, SL_FILM_GREY = 3 };

typedef struct sl_film_scan {
    char *path;
    char sha256[SL_SHA256_HEX_LEN];
    size_t width, height;
    int channels;         /* 1 (grey) or 3 (RGB) */
    int bits;             /* 8 or 16 */
    double max_value;     /* 255 or 65535 */
    double pixel_cm;      /* pixel size, cm (square pixels) */
    bool dpi_from_tags;
    uint16_t *pix;        /* channel planes: pix[c * width * height + y * width + x] */
    sl_notes notes;
} sl_film_scan;

/* Read a scan. dpi > 0 gives the pixel density when the file has no
 * resolution tags (or overrides them, with a note when they differ); dpi <= 0
 * requires the tags. */
sl_status sl_film_scan_read(const char *path, double dpi, sl_film_scan **out, sl_error *err);
void sl_film_scan_free(sl_film_scan *s);

/* The plane of a channel (SL_FILM_RED..SL_FILM_GREY); NULL if the scan has
 * no such channel (a grey scan answers every channel with its one plane). */
const uint16_t *sl_film_plane(const sl_film_scan *s, int channel);
const char *sl_film_channel_name(int channel);

typedef struct sl_film_stats {
    double mean, sd;      /* robust mean and standard deviation of the pixel values */
    double sem;           /* sd / sqrt(n_used) */
    double median;
    size_t n, n_used, n_saturated;
} sl_film_stats;

/* Robust statistics of a channel in the pixel rectangle [x0, x1) x [y0, y1).
 * SL_EINPUT when the rectangle is empty or outside the image, or when more
 * than SL_FILM_MAX_SATURATED_SHARE of its pixels are saturated or empty. */
sl_status sl_film_region_stats(const sl_film_scan *s, int channel, long x0, long y0, long x1,
                               long y1, sl_film_stats *st, sl_error *err);

/* Robust mean of a set of values (median-based clip, as above). */
void sl_film_robust(double *v, size_t n, sl_film_stats *st);

/* ------------------------------------------------------ the curve -- */

typedef enum { SL_FILM_FORM_POWER = 0, SL_FILM_FORM_RATIONAL = 1, SL_FILM_NFORMS = 2 } sl_film_form;
const char *sl_film_form_name(sl_film_form f);
/* The dose (cGy) at net optical density x; grad (3 values) may be NULL. */
double sl_film_form_eval(sl_film_form f, const double *theta, double x, double *grad);

typedef struct sl_film_formfit {
    bool ok;              /* converged, finite, monotone over the calibrated range */
    char why[200];        /* when not ok */
    double theta[3];      /* power: a, b, n; rational: a, b, c (natural units) */
    double covar[9];      /* scaled by covar_scale */
    double covar_scale;   /* max(1, chi2 / dof) */
    double chisq, aicc;
} sl_film_formfit;

typedef struct sl_film_point {
    size_t piece;         /* index in the calibration's pieces */
    double dose_cgy;
    double netod, netod_sigma;
    double dose_sigma_cgy; /* the weight of the fit (see models/README.md) */
    bool held_out;        /* not used in the fit (a check piece) */
} sl_film_point;

typedef struct sl_film_channel {
    int channel;
    double pv0, pv0_sem;  /* the unexposed pieces' pixel value and its standard error */
    double pixel_rel_sd;  /* pooled pixel standard deviation of the unexposed pieces / pv0 */
    double netod_scatter; /* scatter of the points about the curve beyond their noise (netOD) */
    double max_netod;     /* the calibrated range: largest netOD and dose of the fit */
    double max_dose_cgy;
    size_t npoints;
    sl_film_point *points;
    sl_film_formfit forms[SL_FILM_NFORMS];
    int chosen;           /* the form of the lower AICc among those ok; -1 if none */
    double lowest_dose_cgy; /* NAN when no dose in range qualifies */
} sl_film_channel;

typedef struct sl_film_piece {
    char *scan;           /* as the calibration set names it */
    char *path;
    char sha256[SL_SHA256_HEX_LEN];
    double dose_cgy;
    bool held_out;
    long x0, y0, x1, y1;  /* region, pixels (half-open) */
    sl_film_stats stats[3];
    char *scan_before;    /* the piece scanned before exposure (NULL: none) */
    char *path_before;
    char sha256_before[SL_SHA256_HEX_LEN];
    sl_film_stats before[3];
    size_t line;
} sl_film_piece;

typedef struct sl_film_curve {
    char *source;         /* the calibration set (calibrate) or the curve file (loaded) */
    char sha256[SL_SHA256_HEX_LEN];
    char *notice, *lot, *film, *scanner, *scan_settings, *exposed, *scanned;
    char *created, *tool_version;
    bool invented;
    int channel;          /* the channel profiles use */
    int nchannels;
    sl_film_channel ch[3];
    double resolve_fraction; /* lowest dose: where its standard uncertainty is this share of it */
    double reading_area_cm2; /* the area a reading averages, for the lowest dose */
    double pixel_cm;      /* of the calibration scans */
    int bits;
    size_t npieces;
    sl_film_piece *pieces;
    bool pre_scans;       /* every piece has a scan before exposure: netOD per piece */
    sl_notes notes;
} sl_film_curve;

typedef struct sl_film_cal_options {
    double dpi;               /* <= 0: from the tags */
    double resolve_fraction;  /* 0 -> 1 */
    double reading_area_cm2;  /* 0 -> SL_FILM_READING_AREA_CM2 */
    const char *created;      /* time recorded in the curve */
    const char *channel;      /* NULL: the set's, or red */
} sl_film_cal_options;

#define SL_FILM_READING_AREA_CM2 0.04 /* SL_FILM_BAND_CM x SL_FILM_STEP_CM */

/* Read a calibration set, measure its pieces and fit its curve. */
sl_status sl_film_calibrate(const char *path, const sl_film_cal_options *opt,
                            sl_film_curve **out, sl_error *err);
sl_status sl_film_curve_write(const sl_film_curve *c, FILE *fp, sl_error *err);
sl_status sl_film_curve_load(const char *path, sl_film_curve **out, sl_error *err);
void sl_film_curve_free(sl_film_curve *c);

/* Dose (cGy) of a net optical density through the curve's chosen form of a
 * channel, with its standard uncertainty for a reading whose own netOD
 * standard deviation is netod_sd (the curve's covariance, its scatter and
 * the reading). NAN above the calibrated range. */
double sl_film_dose(const sl_film_channel *c, double netod, double netod_sd, double *sigma);

/* The calibration report (HTML with figures drawn by cairo). */
sl_status sl_film_curve_report(const sl_film_curve *c, FILE *fp, sl_error *err);
/* The same as a PDF (A4, cairo and Pango). */
sl_status sl_film_curve_report_pdf(const sl_film_curve *c, FILE *fp, sl_error *err);

/* ------------------------------------------------------ profiles -- */

#define SL_FILM_BAND_CM 0.4   /* default width of the band averaged across the line */
#define SL_FILM_STEP_CM 0.1   /* default spacing of profile points */

/* How a profile cell's pixels become dose: through the curve's one channel,
 * or through the red, green and blue channels together with a thickness
 * factor per cell (the triple-channel method; needs RGB scans and a curve
 * with the three channels fitted). */
typedef enum { SL_FILM_DOSE_SINGLE = 0, SL_FILM_DOSE_TRIPLE = 1 } sl_film_dose_channels;
/* The range searched for the film thickness factor (a best value on either
 * end is not taken: the cell is dropped and counted). */
#define SL_FILM_TAU_LO 0.85
#define SL_FILM_TAU_HI 1.15

typedef struct sl_film_profile_options {
    const char *curve_path;
    const char *out_dir;
    double dpi;
    const char *created;
    sl_film_dose_channels dose_channels;
} sl_film_profile_options;

typedef struct sl_film_run_summary {
    size_t nfilms, nprofiles;
    size_t dropped_low, dropped_high; /* profile points below the lowest resolvable dose /
                                         above the calibrated range */
    size_t dropped_tau;               /* triple-channel: cells whose thickness factor lies on
                                         its range's bound */
    char *measurement_set;            /* path written */
    sl_notes notes;
} sl_film_run_summary;

/* Read a film set and a curve, write the profile CSV files under DIR/profiles (the same
 * points with their uncertainty under DIR/points), DIR/measurements.yaml, DIR/films.yaml
 * (what was found) and DIR/qa/<film>.html. Output files are written atomically; the
 * measurement set is read back as `strayline fit` reads it before it is written. */
sl_status sl_film_profiles(const char *films_path, const sl_film_profile_options *opt,
                           sl_film_run_summary *sum, sl_error *err);
void sl_film_run_summary_free(sl_film_run_summary *s);

/* A PNG of a figure, base64-encoded as a data: URI (caller frees); used by
 * the QA pages. */
char *sl_film_png_uri(const unsigned char *png, size_t n);


#ifdef __cplusplus
}
#endif

#endif
