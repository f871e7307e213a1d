/*
 * strayline: the beam frame, IEC 61217 coordinate systems for one beam.
 *
 * A point in DICOM patient coordinates (LPS: +x patient left, +y posterior,
 * +z head) is taken, with the origin moved to the isocentre, through
 *   patient -> IEC patient support  (by Patient Position, eight positions)
 *           -> IEC fixed            (Patient Support Angle + Table Top Eccentric Angle)
 *           -> IEC gantry           (Gantry Angle)
 *           -> IEC beam limiting device (Beam Limiting Device Angle),
 * so that p_bld = Rz(coll)^T Ry(gantry)^T Rz(couch + eccentric) P (p - iso).
 * The source sits at (0, 0, SAD) in the gantry and beam-limiting-device
 * frames, the beam travels along -Z.
 *
 * The eccentric rotation is about a vertical axis like the couch rotation,
 * so the two compose to one rotation about the vertical; the table-top
 * translations do not enter because the plan's isocentre, given in patient
 * coordinates, is where the machine isocentre sits.
 *
 * All lengths here are cm (converted once from the plan's mm), angles degrees.
 */
#ifndef STRAYLINE_FRAME_H
#define STRAYLINE_FRAME_H

#include <stdbool.h>

#include "strayline/error.h"
#include "strayline/plan.h"

#ifdef __cplusplus
extern "C" {
#endif

typedef struct sl_frame {
    double r[3][3];   /* p_bld = r (p - iso) */
    sl_vec3 iso_cm;   /* isocentre, patient coordinates */
    double sad_cm;
} sl_frame;

/* The matrix P of a patient position: row i gives IEC support axis i
 * (X, Y, Z) in DICOM patient terms. */
void sl_frame_position_matrix(sl_position pos, double p[3][3]);

void sl_frame_init(sl_frame *f, sl_position pos, double gantry_deg, double collimator_deg,
                   double couch_deg, double eccentric_deg, sl_vec3 iso_cm, double sad_cm);

/* The frame of a plan's beam (position from its patient setup). */
sl_status sl_frame_from_beam(sl_frame *f, const sl_plan *plan, const sl_beam *beam,
                             sl_error *err);

sl_vec3 sl_frame_to_bld(const sl_frame *f, sl_vec3 patient_cm);
sl_vec3 sl_frame_to_patient(const sl_frame *f, sl_vec3 bld_cm);

/* The source and the unit beam direction (source towards isocentre), in
 * patient coordinates. */
sl_vec3 sl_frame_source(const sl_frame *f);
sl_vec3 sl_frame_direction(const sl_frame *f);

/* Divergent projection of a beam-limiting-device point onto the isocentric
 * plane: (x, y) * SAD / (SAD - z). *scale receives (SAD - z) / SAD, the
 * factor from the isocentric plane to the plane through the point. False
 * (and nothing written) for a point at or behind the source plane. */
bool sl_frame_project(const sl_frame *f, sl_vec3 bld_cm, sl_vec2 *iso_plane_cm, double *scale);

/* The patient point on the isocentric plane at (u, v) cm (for rays). */
sl_vec3 sl_frame_iso_plane_point(const sl_frame *f, double u_cm, double v_cm);

#ifdef __cplusplus
}
#endif

#endif
