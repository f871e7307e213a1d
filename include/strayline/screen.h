/*
 * strayline: one screening, from a paired plan and structure set to the
 * judged organs. This is the estimate pipeline as a library call, so that
 * `estimate` (one plan from the command line), `scan` (a folder) and
 * `listen` (a DICOM node) screen a plan the same way: points and landmarks
 * are added, the fetus what-if copies made, the fields placed, the model
 * applied and the action levels compared, in that order.
 *
 * The request says what the user asked beyond the plan; every option that
 * moves a number away from the plan as delivered (a shield, the measured
 * points instead of the fits, a reference dose by hand, one depth for every
 * organ, a fetus shifted toward the head, the bolus left out) becomes a what-if record that the
 * reports put at the top and beside each organ it touches.
 */
#ifndef STRAYLINE_SCREEN_H
#define STRAYLINE_SCREEN_H

#include "strayline/dose.h"
#include "strayline/levels.h"
#include "strayline/locate.h"
#include "strayline/model.h"
#include "strayline/plan.h"
#include "strayline/structures.h"

#ifdef __cplusplus
extern "C" {
#endif

/* An organ or dosimeter position given by the user (patient coordinates, mm). */
typedef struct sl_screen_point {
    const char *name;
    const char *kind;
    sl_vec3 mm;
} sl_screen_point;

/* An organ outside the scan, measured on the patient (cm). */
typedef struct sl_screen_landmark {
    const char *name;
    const char *kind;
    double distance_cm, depth_cm;
} sl_screen_landmark;

typedef struct sl_screen_request {
    const sl_model *model;          /* borrowed; required */
    const sl_levels *levels;        /* borrowed; required */
    const char *levels_path;        /* named in messages about kinds; may be NULL */
    sl_estimate_options estimate;   /* .model is set by sl_screen_run */
    sl_locate_options locate;       /* .catalogue is set by sl_screen_run */
    sl_patient patient;
    bool allow_mismatch;
    const sl_organ_map *map;        /* --organ ROI=KIND */
    size_t nmap;
    const sl_other_dose *others;
    size_t nothers;
    const sl_screen_point *points;
    size_t npoints;
    const sl_screen_landmark *landmarks;
    size_t nlandmarks;
} sl_screen_request;

/* Defaults: the estimate's and locate's defaults, a patient with nothing known. */
void sl_screen_request_init(sl_screen_request *r);

/* What kind of what-if a record is. */
typedef enum sl_whatif_kind {
    SL_WHATIF_SHIELD,     /* an electron transmission over one ROI */
    SL_WHATIF_POINTS,     /* the measured points interpolated instead of the fits */
    SL_WHATIF_REFDOSE,    /* the reference dose given by hand, not MU x output */
    SL_WHATIF_DEPTH,      /* one depth for every organ, not the body contour */
    SL_WHATIF_FETUS_RISE, /* a copy of each fetus shifted toward the head */
    SL_WHATIF_NO_BOLUS    /* the plan's bolus left out of depths */
} sl_whatif_kind;

typedef struct sl_whatif {
    sl_whatif_kind kind;
    const char *roi;      /* the ROI it touches (shield, fetus copy); NULL: every organ */
    char text[400];       /* one line for the banner, with its numbers and units */
} sl_whatif;

typedef struct sl_screen {
    sl_plan *plan;
    sl_structure_set *ss;
    sl_location *loc;
    sl_estimate *est;
    sl_assessments *as;
    size_t nwhatifs;
    sl_whatif *whatifs;
    /* private: storage the estimate refers to */
    sl_applicator_size *catalogue;
    sl_organ_map *map;
    size_t nmap;
    char **names;
    size_t nnames;
    sl_roi *landmark_rois;
    sl_point_reach *reach;
} sl_screen;

/* Screen one plan. Takes ownership of plan and ss (freed with the screen,
 * or at once on failure). Usage errors (SL_EUSAGE): a point or landmark of
 * an unknown kind or of a name the structure set has, two of one name, a
 * shield over no ROI, a mapping that names no ROI. Input errors: the plan
 * and structure set do not belong together (unless allow_mismatch), and
 * whatever the stages refuse. */
sl_status sl_screen_run(sl_plan *plan, sl_structure_set *ss, const sl_screen_request *req,
                        sl_screen **out, sl_error *err);
void sl_screen_free(sl_screen *s);

/* Does a what-if touch this organ (by ROI name)? Returns the first that
 * does, or NULL. Whole-plan what-ifs touch every organ. */
const sl_whatif *sl_screen_whatif_for(const sl_screen *s, const char *roi);

#ifdef __cplusplus
}
#endif

#endif
