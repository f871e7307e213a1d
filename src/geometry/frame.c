/*
 * IEC 61217 beam frames (see include/strayline/frame.h for the chain).
 *
 * The rotation matrices are right-handed rotations; the sense of each angle
 * follows IEC 61217: positive gantry rotation is clockwise seen from the
 * isocentre looking at the gantry (so G90 puts the source on the left of a
 * head-first supine patient), positive patient support and collimator
 * rotations are counter-clockwise seen from above and from the source.
 */
#include "strayline/frame.h"

#include <math.h>
#include <string.h>

static const double position_matrices[SL_POS_COUNT][3][3] = {
    [SL_POS_HFS] = {{1, 0, 0}, {0, 0, 1}, {0, -1, 0}},
    [SL_POS_HFP] = {{-1, 0, 0}, {0, 0, 1}, {0, 1, 0}},
    [SL_POS_FFS] = {{-1, 0, 0}, {0, 0, -1}, {0, -1, 0}},
    [SL_POS_FFP] = {{1, 0, 0}, {0, 0, -1}, {0, 1, 0}},
    [SL_POS_HFDR] = {{0, 1, 0}, {0, 0, 1}, {1, 0, 0}},
    [SL_POS_HFDL] = {{0, -1, 0}, {0, 0, 1}, {-1, 0, 0}},
    [SL_POS_FFDR] = {{0, -1, 0}, {0, 0, -1}, {1, 0, 0}},
    [SL_POS_FFDL] = {{0, 1, 0}, {0, 0, -1}, {-1, 0, 0}},
};

void sl_frame_position_matrix(sl_position pos, double p[3][3])
{
    memcpy(p, position_matrices[pos], sizeof position_matrices[pos]);
}

static void mul(double a[3][3], double b[3][3], double out[3][3])
{
    double t[3][3];
    for (int i = 0; i < 3; i++)
        for (int j = 0; j < 3; j++)
            t[i][j] = a[i][0] * b[0][j] + a[i][1] * b[1][j] + a[i][2] * b[2][j];
    memcpy(out, t, sizeof t);
}

/* Trigonometry in degrees with exact values at multiples of 90 degrees, so
 * that G90 or C270 does not leave 6e-17 residues in the frame. */
static void sincos_deg(double deg, double *s, double *c)
{
    double r = fmod(deg, 360.0);
    if (r < 0)
        r += 360.0;
    if (r == 0.0) {
        *s = 0, *c = 1;
    } else if (r == 90.0) {
        *s = 1, *c = 0;
    } else if (r == 180.0) {
        *s = 0, *c = -1;
    } else if (r == 270.0) {
        *s = -1, *c = 0;
    } else {
        double a = r * M_PI / 180.0;
        *s = sin(a);
        *c = cos(a);
    }
}

/* Transposes of the right-handed rotations about Z and Y. */
static void rz(double deg, bool transpose, double m[3][3])
{
    double s, c;
    sincos_deg(deg, &s, &c);
    if (transpose)
        s = -s;
    double t[3][3] = {{c, -s, 0}, {s, c, 0}, {0, 0, 1}};
    memcpy(m, t, sizeof t);
}

static void ry(double deg, bool transpose, double m[3][3])
{
    double s, c;
    sincos_deg(deg, &s, &c);
    if (transpose)
        s = -s;
    double t[3][3] = {{c, 0, s}, {0, 1, 0}, {-s, 0, c}};
    memcpy(m, t, sizeof t);
}

void sl_frame_init(sl_frame *f, sl_position pos, double gantry_deg, double collimator_deg,
                   double couch_deg, double eccentric_deg, sl_vec3 iso_cm, double sad_cm)
{
    double m[3][3], t[3][3];
    sl_frame_position_matrix(pos, m);
    rz(couch_deg + eccentric_deg, false, t);
    mul(t, m, m);
    ry(gantry_deg, true, t);
    mul(t, m, m);
    rz(collimator_deg, true, t);
    mul(t, m, m);
    memcpy(f->r, m, sizeof m);
    f->iso_cm = iso_cm;
    f->sad_cm = sad_cm;
}

sl_status sl_frame_from_beam(sl_frame *f, const sl_plan *plan, const sl_beam *beam,
                             sl_error *err)
{
    sl_position pos;
    sl_status st = sl_plan_beam_position(plan, beam, &pos, err);
    if (st != SL_OK)
        return st;
    if (!beam->has_isocenter || !isfinite(beam->gantry_deg) || !isfinite(beam->collimator_deg) ||
        !isfinite(beam->couch_deg))
        return sl_error_set(err, SL_EINPUT, "%s: beam %d: control point 0 lacks the angles or "
                                            "the isocentre needed to place it",
                            plan->source, beam->number);
    sl_vec3 iso = {beam->isocenter_mm.x * 0.1, beam->isocenter_mm.y * 0.1,
                   beam->isocenter_mm.z * 0.1};
    sl_frame_init(f, pos, beam->gantry_deg, beam->collimator_deg, beam->couch_deg,
                  beam->eccentric_deg, iso, beam->sad_mm * 0.1);
    return SL_OK;
}

sl_vec3 sl_frame_to_bld(const sl_frame *f, sl_vec3 p)
{
    double d[3] = {p.x - f->iso_cm.x, p.y - f->iso_cm.y, p.z - f->iso_cm.z};
    return (sl_vec3){f->r[0][0] * d[0] + f->r[0][1] * d[1] + f->r[0][2] * d[2],
                     f->r[1][0] * d[0] + f->r[1][1] * d[1] + f->r[1][2] * d[2],
                     f->r[2][0] * d[0] + f->r[2][1] * d[1] + f->r[2][2] * d[2]};
}

sl_vec3 sl_frame_to_patient(const sl_frame *f, sl_vec3 b)
{
    /* r is orthonormal: its inverse is its transpose */
    return (sl_vec3){f->iso_cm.x + f->r[0][0] * b.x + f->r[1][0] * b.y + f->r[2][0] * b.z,
                     f->iso_cm.y + f->r[0][1] * b.x + f->r[1][1] * b.y + f->r[2][1] * b.z,
                     f->iso_cm.z + f->r[0][2] * b.x + f->r[1][2] * b.y + f->r[2][2] * b.z};
}

sl_vec3 sl_frame_source(const sl_frame *f)
{
    return sl_frame_to_patient(f, (sl_vec3){0, 0, f->sad_cm});
}

sl_vec3 sl_frame_direction(const sl_frame *f)
{
    return (sl_vec3){-f->r[2][0], -f->r[2][1], -f->r[2][2]};
}

bool sl_frame_project(const sl_frame *f, sl_vec3 b, sl_vec2 *uv, double *scale)
{
    double s = (f->sad_cm - b.z) / f->sad_cm;
    if (!(s > 1e-9))
        return false;
    uv->x = b.x / s;
    uv->y = b.y / s;
    *scale = s;
    return true;
}

sl_vec3 sl_frame_iso_plane_point(const sl_frame *f, double u, double v)
{
    return sl_frame_to_patient(f, (sl_vec3){u, v, 0});
}
