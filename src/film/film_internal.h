/*
 * Private declarations shared by the film module's files: what the profile
 * stage found on one film, handed to the QA page writer (qa.c).
 */
#ifndef STRAYLINE_FILM_INTERNAL_H
#define STRAYLINE_FILM_INTERNAL_H

#include "strayline/film.h"
#include "strayline/yamlio.h"

char *sl_film_join_dir_of(const char *base, const char *file);
int sl_film_parse_channel(const char *s);
/* The head every film file kind shares: checks that `format` is `want` (named
   before any missing key, so a file of another kind is called that), reads the
   root's fields into f (f[0] must be "format", f[1] "format_version") and
   accepts format_version 1 only.  `what` names the file kind in errors. */
sl_status sl_film_read_head(sl_yaml *y, const char *want, const char *what, sl_yaml_field *f,
                            size_t nf, sl_error *err);

/* The triple-channel dose (triple.c): the red, green and blue channels of a
   curve with the film's own unexposed levels, the unexposed optical densities
   OD0_k = log10(max_value / PV0_k) and the range searched for the thickness
   factor. */
typedef struct sl_film_triple {
    const sl_film_channel *ch[3];
    double od0[3];
    double max_value;
    double tau_lo, tau_hi;
} sl_film_triple;

enum {
    SL_TRIPLE_OK = 0,
    SL_TRIPLE_ABOVE,   /* a channel above its calibrated range (or saturated) */
    SL_TRIPLE_BOUND,   /* the best thickness factor lies on the range's bound: not taken */
    SL_TRIPLE_FLAT,    /* the channels cannot tell the factor: no uncertainty */
};

typedef struct sl_film_triple_result {
    int status;
    double tau, tau_sigma;
    double dose_cgy, sigma_cgy;
    double chisq;      /* the weighted spread at the minimum (1 degree of freedom) */
} sl_film_triple_result;

/* One cell: the robust mean pixel value and its standard error per channel
   (red, green, blue). */
void sl_film_triple_cell(const sl_film_triple *t, const double pv[3], const double sem[3],
                         sl_film_triple_result *out);

enum { SL_DIR_CROSSPLANE = 0, SL_DIR_INPLANE = 1, SL_DIR_DIAGONAL = 2 };

/* One profile sampled on one film: off-axis positions k * step (cm). */
typedef struct film_line {
    int direction;
    double ux, uy;        /* unit vector of the line in image pixels (x right, y down) */
    long kmin, kmax;      /* grid indices sampled */
    double *dose_cgy;     /* per index (kmax - kmin + 1), NAN where not resolved */
    double *sigma_cgy;
    size_t dropped_low, dropped_high;
    /* triple-channel only (NULL otherwise): per index the channels' mean pixel values
       and standard errors (red, green, blue, then the three errors), the thickness factor
       and its uncertainty, the cell's status (SL_TRIPLE_*) */
    double *pv6, *tau, *tau_sigma;
    unsigned char *status;
    size_t dropped_tau;
} film_line;

typedef struct film_result {
    const char *id, *scan_name;
    const sl_film_scan *scan;
    const float *dose;      /* dose map, cGy, NAN where not resolved */
    double max_dose_cgy;    /* the curve's calibrated top */
    double cx, cy;          /* field centre, pixels */
    double angle_deg;       /* crossplane axis from the image axis it was declared along */
    double cax_dose_cgy;    /* NAN when above the calibrated range */
    double threshold_cgy;   /* the isodose level the field was found at */
    bool cax_saturated;
    double band_cm, step_cm;
    double cax_reference_cgy, monitor_units;
    double control_pv;      /* the unexposed control piece's pixel value, NAN without one */
    double energy_mev, depth_cm;
    const char *applicator, *insert;
    size_t nlines;
    film_line lines[3];
    bool triple;            /* the triple-channel dose */
    double pv0[3], pv0_sem[3]; /* the unexposed levels used (red, green, blue) */
    double tau_median, tau_min, tau_max; /* over the cells with a dose */
    size_t map_blocks, map_blocks_filled; /* the map's thickness blocks, and those that
                                             took the film's median factor */
    double map_block_cm;
    double axis_cell_cgy;   /* the triple-channel dose of the centre's cell (mean over the
                               lines; NAN when none has one); cax_dose_cgy is the map's */
    size_t ntau, dropped_tau;
} film_result;

/* Write the QA page of one film. */
sl_status sl_film_qa_page(const film_result *r, const sl_film_curve *curve, FILE *fp,
                          sl_error *err);

#endif
