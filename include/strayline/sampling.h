/*
 * strayline: organ sampling, the step from contours to volume elements.
 *
 * A ROI's closed contours are filled slice by slice by the even-odd rule on
 * a square lattice whose pitch adapts to the organ's size, so that a lens of
 * 0.2 cm^3 gets thousands of samples and a 5 L organ some tens of thousands
 * (never hundreds of millions). Each slab is divided into sub-layers of
 * about the same pitch. Every sample carries the volume it stands for: the
 * exact chord length of its lattice row within the contour times the row
 * pitch times the sub-layer thickness, shared among the row's samples, so
 * volumes converge fast (midpoint rule across rows, exact along them).
 * A contour too thin to hold a lattice point still gets one sample.
 *
 * The lattice alone misses an organ's nearest point by up to a pitch, and
 * the pitch grows with the organ. So every closed contour's outline is
 * sampled too: its own vertices, thinned only where the outline between two
 * kept vertices stays within SL_OUTLINE_TOL_CM of the straight line joining
 * them, and long edges cut to pieces no longer than the lattice pitch. These
 * outline samples follow the volume samples in the arrays, carry no volume
 * (so volumes, means and in-field fractions are the lattice's alone) and
 * stay in contour order, loop by loop, so that the placement stage can
 * search the outline between two of them (locate.c).
 *
 * POINT ROIs become single points of zero volume (a device marker, a fetal
 * landmark). OPEN_PLANAR / OPEN_NONPLANAR contours are ignored with a note.
 */
#ifndef STRAYLINE_SAMPLING_H
#define STRAYLINE_SAMPLING_H

#include <stdbool.h>
#include <stddef.h>

#include "strayline/error.h"
#include "strayline/structures.h"

#ifdef __cplusplus
extern "C" {
#endif

typedef struct sl_sampling_options {
    size_t target_samples;  /* aimed-for samples of an organ (default 4000) */
    double min_pitch_cm;    /* finest lattice pitch (default 0.02 cm) */
    double max_pitch_cm;    /* coarsest lattice pitch (default 0.5 cm) */
    double default_thickness_cm; /* slab of a single-slice ROI (default: typical spacing) */
} sl_sampling_options;

void sl_sampling_default_options(sl_sampling_options *o);

/* How far (cm) the thinned outline may stray from the contoured one. */
#define SL_OUTLINE_TOL_CM 0.001

typedef struct sl_organ_samples {
    size_t n;
    sl_vec3 *points;      /* cm, patient coordinates */
    double *volume_cc;    /* volume each sample stands for (0 for points) */
    double volume_cc_total;
    double pitch_cm;      /* lattice pitch used (0 for points) */
    size_t nslices;
    /* outline samples: the last n_outline of the n, volume 0, in contour
     * order; loop k holds outline samples [loop_first[k], loop_first[k+1])
     * counted from the first outline sample (noutline_loops + 1 entries) */
    size_t n_outline;
    size_t noutline_loops;
    size_t *outline_loop_first;
    bool is_point;        /* a POINT ROI */
    sl_notes notes;       /* ignored contours and the like */
} sl_organ_samples;

sl_status sl_sample_roi(const sl_roi *roi, const char *file, const sl_sampling_options *opt,
                        sl_organ_samples *out, sl_error *err);

void sl_organ_samples_free(sl_organ_samples *s);

#ifdef __cplusplus
}
#endif

#endif
