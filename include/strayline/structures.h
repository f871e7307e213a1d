/*
 * strayline: an RT Structure Set as plain C data.
 *
 * Points are in millimetres in DICOM patient coordinates (LPS), as in the
 * file. ROI names, types and colours are kept as the file gives them; what a
 * ROI means clinically (lens, fetus, device) is decided later, by the action
 * level tables, not here.
 */
#ifndef STRAYLINE_STRUCTURES_H
#define STRAYLINE_STRUCTURES_H

#include <stdbool.h>
#include <stddef.h>

#include "strayline/error.h"
#include "strayline/plan.h"

#ifdef __cplusplus
extern "C" {
#endif

typedef enum sl_contour_type {
    SL_CONTOUR_POINT,
    SL_CONTOUR_OPEN_PLANAR,
    SL_CONTOUR_OPEN_NONPLANAR,
    SL_CONTOUR_CLOSED_PLANAR,
    SL_CONTOUR_CLOSEDPLANAR_XOR
} sl_contour_type;

const char *sl_contour_type_code(sl_contour_type t);
bool sl_contour_type_parse(const char *code, sl_contour_type *out);

typedef struct sl_contour {
    sl_contour_type type;
    size_t npoints;
    sl_vec3 *points; /* mm, patient coordinates */
} sl_contour;

typedef struct sl_roi {
    int number;
    char *name;
    char *type;      /* RT ROI Interpreted Type; NULL when no observation gives one */
    char *frame_uid; /* Referenced Frame of Reference UID, may be NULL */
    bool has_color;
    int color[3];    /* ROI Display Color, 0..255 */
    size_t ncontours;
    sl_contour *contours;
} sl_roi;

typedef struct sl_structure_set {
    char *source;
    char *sop_instance_uid;
    char *label;
    char *patient_id;
    char *patient_name;
    char *frame_uid; /* first Referenced Frame of Reference UID, may be NULL */
    size_t nrois;
    sl_roi *rois;
    sl_notes notes;
} sl_structure_set;

void sl_structure_set_free(sl_structure_set *ss);

/* Total number of contour points of a ROI. */
size_t sl_roi_point_count(const sl_roi *roi);
/* Lowest and highest z (mm) of a ROI's points; false when it has none. */
bool sl_roi_z_range(const sl_roi *roi, double *zmin, double *zmax);

const sl_roi *sl_structures_find(const sl_structure_set *ss, const char *name);
/* The ROI typed EXTERNAL (the body), or NULL. Input error if several. */
sl_status sl_structures_external(const sl_structure_set *ss, const sl_roi **out,
                                 sl_error *err);

/* Unique ROI numbers, counts that agree, every ROI has a name. */
sl_status sl_structure_set_validate(sl_structure_set *ss, sl_error *err);

/* Add a ROI holding one POINT contour (mm, patient coordinates): a point
 * given on the command line (a fetal landmark, a device) stands as an organ. */
/* A copy of ROI src named name, every point moved by shift_mm (a what-if
 * position, e.g. a fetus risen toward the diaphragm); noted in ss->notes. */
sl_status sl_structures_add_shifted(sl_structure_set *ss, const char *src, const char *name,
                                    sl_vec3 shift_mm, sl_error *err);
sl_status sl_structures_add_point(sl_structure_set *ss, const char *name, const char *type,
                                  sl_vec3 point_mm, sl_error *err);

/* Do a plan and a structure set belong together? The plan's referenced
 * structure set UID must be the structure set's SOP Instance UID, and the
 * frames of reference must match. With allow_mismatch the check only adds a
 * warning to both notes lists (which every output repeats). */
sl_status sl_pair_check(sl_plan *plan, sl_structure_set *ss, bool allow_mismatch,
                        sl_error *err);

#ifdef __cplusplus
}
#endif

#endif
