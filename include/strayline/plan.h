/*
 * strayline: an RT Plan as plain C data.
 *
 * The DICOM bridge (dicom.h) fills these structs; nothing here knows about
 * DICOM encodings. Lengths are in millimetres and angles in degrees, exactly
 * as DICOM gives them, because this struct is a faithful copy of the file;
 * conversion to centimetres happens in the geometry stage. A value that the
 * file does not carry is NAN (for doubles) or NULL (for strings), never a
 * made-up default, except where a default is documented and a warning is
 * added to the plan's notes (Source-Axis Distance).
 */
#ifndef STRAYLINE_PLAN_H
#define STRAYLINE_PLAN_H

#include <stdbool.h>
#include <stddef.h>

#include "strayline/error.h"

#ifdef __cplusplus
extern "C" {
#endif

typedef struct sl_vec2 {
    double x, y;
} sl_vec2;

typedef struct sl_vec3 {
    double x, y, z;
} sl_vec3;

/* DICOM Patient Position (0018,5100) values that strayline places. */
typedef enum sl_position {
    SL_POS_HFS,
    SL_POS_HFP,
    SL_POS_FFS,
    SL_POS_FFP,
    SL_POS_HFDR,
    SL_POS_HFDL,
    SL_POS_FFDR,
    SL_POS_FFDL,
    SL_POS_COUNT
} sl_position;

/* Code string of a position ("HFS"), or NULL for an invalid value. */
const char *sl_position_code(sl_position p);
/* Parse a code string; false if it is not one of the eight positions. */
bool sl_position_parse(const char *code, sl_position *out);

typedef enum sl_block_type { SL_BLOCK_APERTURE, SL_BLOCK_SHIELDING } sl_block_type;

typedef struct sl_block {
    int number;
    char *name;     /* Block Name, may be NULL */
    char *tray_id;  /* Block Tray ID, may be NULL */
    sl_block_type type;
    int divergent;  /* 1 PRESENT, 0 ABSENT, -1 not given */
    double source_to_tray_mm;  /* NAN when absent */
    double thickness_mm;       /* NAN when absent */
    double transmission;       /* NAN when absent */
    char *material;            /* Material ID, may be NULL */
    size_t npoints;
    sl_vec2 *points; /* mm, isocentric plane, IEC beam limiting device frame */
} sl_block;

typedef struct sl_applicator {
    bool present;
    char *id;          /* Applicator ID */
    char *type;        /* ELECTRON_SQUARE, ... */
    char *description; /* may be NULL */
    bool has_geometry; /* Applicator Geometry Sequence present */
    char *aperture_shape; /* SYM_SQUARE, SYM_RECTANGLE, SYM_CIRCULAR, or NULL */
    double opening_mm;    /* Applicator Opening: square side or circle diameter; NAN */
    double opening_x_mm;  /* NAN */
    double opening_y_mm;  /* NAN */
    double source_to_applicator_mm; /* NAN when absent */
} sl_applicator;

typedef struct sl_beam {
    int number;
    char *name;
    char *description;
    char *radiation_type;  /* ELECTRON, PHOTON, ... */
    char *delivery_type;   /* TREATMENT, SETUP, ... (TREATMENT when absent) */
    char *beam_type;       /* STATIC or DYNAMIC */
    char *machine;         /* Treatment Machine Name */
    double sad_mm;
    bool sad_defaulted;    /* not in the file: 1000 mm assumed, noted */
    size_t ncontrol_points;
    /* control point 0 */
    double energy_mev;     /* NAN when absent */
    double gantry_deg;
    double collimator_deg;
    double couch_deg;
    double eccentric_deg;  /* Table Top Eccentric Angle, 0 when absent */
    bool has_isocenter;
    sl_vec3 isocenter_mm;  /* patient coordinates (LPS) */
    double ssd_mm;         /* Source to Surface Distance, NAN when absent */
    sl_applicator applicator;
    size_t nblocks;
    sl_block *blocks;
    size_t nboli;
    int *bolus_roi_numbers; /* Referenced ROI Number of each referenced bolus */
    int setup_number;       /* Referenced Patient Setup Number, -1 when absent */
} sl_beam;

typedef struct sl_setup {
    int number;
    sl_position position;
} sl_setup;

typedef struct sl_beam_ref {
    int beam_number;
    double meterset_mu;  /* Beam Meterset, NAN when absent */
    double beam_dose_gy; /* Beam Dose, NAN when absent */
} sl_beam_ref;

typedef struct sl_fraction_group {
    int number;
    int fractions; /* Number of Fractions Planned, -1 when absent */
    size_t nrefs;
    sl_beam_ref *refs;
} sl_fraction_group;

typedef struct sl_dose_ref {
    int number;
    char *type;                 /* TARGET, ORGAN_AT_RISK */
    char *description;          /* may be NULL */
    double target_prescription_gy; /* NAN when absent */
} sl_dose_ref;

typedef struct sl_plan {
    char *source;            /* file name the plan came from */
    char *sop_instance_uid;
    char *label;             /* RT Plan Label */
    char *name;              /* RT Plan Name, may be NULL */
    char *patient_id;        /* for report headers and the pair check (sl_pair_check) */
    char *patient_name;
    char *patient_sex;       /* Patient's Sex (M, F, O), may be NULL */
    char *patient_birth_date;/* Patient's Birth Date (YYYYMMDD), may be NULL */
    char *plan_date;         /* RT Plan Date (YYYYMMDD), may be NULL */
    char *frame_uid;         /* Frame of Reference UID, may be NULL */
    char *structure_set_uid; /* Referenced Structure Set SOP Instance UID, may be NULL */
    char *study_uid;         /* Study Instance UID, may be NULL */
    /* RT Approval module: Approval Status (APPROVED, UNAPPROVED, REJECTED),
     * Review Date (YYYYMMDD), Review Time, Reviewer Name; NULL when absent */
    char *approval_status;
    char *review_date;
    char *review_time;
    char *reviewer_name;
    size_t nsetups;
    sl_setup *setups;
    size_t ngroups;
    sl_fraction_group *groups;
    size_t ndose_refs;
    sl_dose_ref *dose_refs;
    size_t nbeams;
    sl_beam *beams;
    sl_notes notes;          /* warnings met while reading */
} sl_plan;

void sl_plan_free(sl_plan *plan);

/* Whether a beam delivers dose: every Treatment Delivery Type (300A,00CE)
 * but SETUP, which applies no beam (DICOM PS3.3, RT Beams Module; from
 * memory). TREATMENT, CONTINUATION (an interrupted treatment's rest) and
 * TRMT_PORTFILM (a portal image taken with the treatment port) deliver
 * treatment dose, OPEN_PORTFILM an open field's; a type this tool does not
 * know is taken to deliver dose, the cautious reading. */
/* The least meterset (MU) a treatment beam's dose is taken from: below it
 * the plan is a placeholder (common practice: electron fields run tens to
 * hundreds of MU a fraction); an electron SETUP beam with as much is a
 * contradiction and refused. */
#define SL_MIN_TREATMENT_MU 1.0

bool sl_beam_delivers_dose(const sl_beam *beam);

/* Why a beam is not estimated, or NULL when it is an electron beam that
 * delivers dose (sl_beam_delivers_dose), which strayline estimates. */
const char *sl_beam_skip_reason(const sl_beam *beam);
/* A beam that delivers dose and that this tool does not estimate (photons,
 * protons, ...): its dose is not in the estimate. */
bool sl_beam_is_other_treatment(const sl_beam *beam);

const sl_beam *sl_plan_find_beam(const sl_plan *plan, int number);
const sl_setup *sl_plan_find_setup(const sl_plan *plan, int number);

/* Position that applies to a beam: its referenced setup, or the only setup
 * of the plan when the beam names none. Input error otherwise. */
sl_status sl_plan_beam_position(const sl_plan *plan, const sl_beam *beam, sl_position *pos,
                                sl_error *err);

/* Check what the reader alone cannot: unique beam and setup numbers, every
 * referenced beam and setup exists, at least one electron beam, no moving
 * electron beam, sane values. Called by the DICOM reader before it returns. */
sl_status sl_plan_validate(sl_plan *plan, sl_error *err);

#ifdef __cplusplus
}
#endif

#endif
