/*
 * strayline: a planning system's dose grid (DICOM RT Dose), read through the
 * DCMTK bridge (src/dicom/rtdose.cc), and its value at a point.
 *
 * Read: the grid (Rows, Columns, Number of Frames, Pixel Spacing, Image
 * Position and Orientation (Patient), Grid Frame Offset Vector), Dose Grid
 * Scaling, Dose Units (GY only), Dose Type (PHYSICAL only), Dose Summation
 * Type (PLAN: the whole plan, or BEAM: the beams its Referenced Beam
 * Sequence names), the Frame of Reference, the study and the referenced
 * RT Plan. Only axial grids whose rows run along +x and columns along +y of
 * the patient (Image Orientation (Patient) 1\0\0\0\1\0) are read; another
 * orientation is refused by name rather than resampled.
 *
 * Values between voxel centres are interpolated trilinearly (the grid's
 * frames may be unevenly spaced); outside the outermost centres there is no
 * value (NAN), never an extrapolation.
 */
#ifndef STRAYLINE_RTDOSE_H
#define STRAYLINE_RTDOSE_H

#include <stdbool.h>
#include <stddef.h>

#include "strayline/error.h"
#include "strayline/plan.h"

#ifdef __cplusplus
extern "C" {
#endif

typedef enum sl_rtdose_summation {
    SL_RTDOSE_PLAN, /* the whole plan: every beam, every fraction */
    SL_RTDOSE_BEAM  /* the beams listed, every fraction */
} sl_rtdose_summation;

/* Largest grid read (voxels): 512 x 512 x 1024. */
#define SL_RTDOSE_MAX_VOXELS ((size_t)1 << 28)

typedef struct sl_rtdose {
    char *source;             /* file name, for messages */
    char *sop_instance_uid;
    char *study_uid;          /* may be NULL */
    char *frame_uid;
    char *plan_uid;           /* Referenced RT Plan Sequence > Referenced SOP Instance UID */
    sl_rtdose_summation summation;
    size_t nbeams;            /* BEAM: the beam numbers it covers */
    int *beams;
    size_t nx, ny, nz;        /* columns, rows, frames */
    double x0_mm, y0_mm;      /* centre of the first voxel (Image Position (Patient)) */
    double dx_mm, dy_mm;      /* between columns (along x) and rows (along y) */
    double *z_mm;             /* nz frame positions, strictly monotonic */
    float *gy;                /* dose (Gy) of voxel (i, j, k) at gy[(k * ny + j) * nx + i] */
    double max_gy;
} sl_rtdose;

/* Read an RT Dose file. Input errors name the file and element. */
sl_status sl_rtdose_read(const char *path, sl_rtdose **out, sl_error *err);
void sl_rtdose_free(sl_rtdose *d);

/* Check that the dose belongs to this plan: the same Frame of Reference,
 * the plan's SOP Instance UID referenced, and for BEAM summation, beams of
 * the plan. Input errors name both files. */
sl_status sl_rtdose_check_plan(const sl_rtdose *d, const sl_plan *plan, sl_error *err);

/* Dose (Gy) at a point (patient coordinates, mm), trilinear between voxel
 * centres; NAN outside the grid. */
double sl_rtdose_at(const sl_rtdose *d, double x_mm, double y_mm, double z_mm);

/* A dose grid to write as RT Dose: axial, even spacing, course dose (Gy)
 * at voxel centres x0 + i step, y0 + j step, z0 + k step (mm), voxel
 * (i, j, k) at gy[(k * ny + j) * nx + i]. */
typedef struct sl_dose_grid {
    size_t nx, ny, nz;
    double x0_mm, y0_mm, z0_mm, step_mm;
    float *gy;
    size_t in_field_unestimated; /* voxels inside a field with no dose (0 written) */
    size_t from_tps;             /* voxels whose dose is the planning system's */
} sl_dose_grid;

void sl_dose_grid_free(sl_dose_grid *g);

/* Write the grid as an RT Dose file at `path` (DCMTK): the patient, study and
 * Frame of Reference of the plan file `plan_path` (read again for them),
 * Dose Summation Type PLAN, the plan referenced, Dose Comment "screening
 * estimate, not a planning dose" and `comment` as its Image Comments. */
sl_status sl_rtdose_write(const char *path, const char *plan_path, const sl_dose_grid *g,
                          const char *comment, sl_error *err);

#ifdef __cplusplus
}
#endif

#endif
