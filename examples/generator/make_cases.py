#!/usr/bin/python3
"""Make the invented demo cases under examples/ (RT Plan + RT Structure Set).

INVENTED DEMO DATA, NOT A REAL PATIENT, NOT FOR CLINICAL USE. The anatomy is
made of ellipses and boxes of plausible adult sizes; names and IDs are made up.

  face-lens    9 MeV field with a cutout on a left-cheek skin lesion, near
               the left eye: lenses, eyes, parotids, thyroid.
  chest-fetus  12 MeV open-applicator boost on the left chest wall of a
               pregnant patient (12 weeks): fetus and uterus far out of field.
  neck-device  9 MeV field with a cutout over the left supraclavicular
               region above a left-pectoral pacemaker.
  chest-oblique  9 MeV open field on the anterior chest at SSD 105 cm,
               gantry 12 deg: an oblique beam at extended SSD, a breast on
               either side of the field.

Run: /usr/bin/python3 examples/generator/make_cases.py [OUTDIR]
(OUTDIR defaults to examples/). The output is deterministic.
"""

import math
import os
import sys

import numpy as np

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import rtbuild as rb  # noqa: E402


def ray_to_ellipse(c, u, centre, ax, ay):
    """First t > 0 with c + t*u on the ellipse (x-cx)^2/ax^2 + (y-cy)^2/ay^2 = 1,
    searching outward from a point c inside it (2-D, mm)."""
    px, py = c[0] - centre[0], c[1] - centre[1]
    a = (u[0] / ax) ** 2 + (u[1] / ay) ** 2
    b = 2 * (px * u[0] / ax ** 2 + py * u[1] / ay ** 2)
    cc = (px / ax) ** 2 + (py / ay) ** 2 - 1
    return (-b + math.sqrt(b * b - 4 * a * cc)) / (2 * a)


def toward_source(gantry_deg):
    """Unit vector from the isocentre toward the source for an HFS patient at
    couch 0, in DICOM patient coordinates: IEC X = x, IEC Z = -y (IEC 61217)."""
    g = math.radians(gantry_deg)
    return (math.sin(g), -math.cos(g))


def inward(iso, gantry, depth):
    """A point `depth` mm below the skin along the central axis."""
    u = toward_source(gantry)
    return (iso[0] - depth * u[0], iso[1] - depth * u[1], iso[2])


def surface_iso(gantry, inner_point, z, centre, ax, ay):
    """Isocentre on the skin where the central axis through inner_point
    leaves the body slice at z (an SSD = SAD setup)."""
    u = toward_source(gantry)
    t = ray_to_ellipse(inner_point, u, centre, ax, ay)
    return [inner_point[0] + t * u[0], inner_point[1] + t * u[1], z]


def body_slices(z_values, section):
    """Closed contours of the body: section(z) -> (cx, cy, ax, ay) or None."""
    out = []
    for z in z_values:
        s = section(z)
        if s:
            cx, cy, ax, ay = s
            out.append(("CLOSED_PLANAR", rb.ellipse(cx, cy, ax, ay, z, n=120)))
    return out


# ----------------------------------------------------------- face-lens --

HEAD = dict(rx=74.0, ry=94.0, rz=120.0)


def face_section(z):
    if z >= -80.0:
        s = math.sqrt(max(0.0, 1 - (z / HEAD["rz"]) ** 2))
        if s <= 0.05:
            return None
        return (0.0, 0.0, HEAD["rx"] * s, HEAD["ry"] * s)
    if z > -200.0:
        return (0.0, 10.0, 55.0, 58.0)
    return (0.0, 20.0, 170.0, 105.0)


def face_lens(outdir):
    patient = {"name": "DEMO^LENS", "id": "DEMO-LENS-01", "sex": "F", "birth_date": "19560101"}
    frame = rb.uid("face-lens", "frame")
    step = 2.5
    zs = rb.slices(-300.0, 117.5, step)
    gantry = 45.0
    z_lesion = -20.0
    s = face_section(z_lesion)
    iso = surface_iso(gantry, (45.0, -60.0), z_lesion, (s[0], s[1]), s[2], s[3])
    rois = [
        {"number": 1, "name": "BODY", "type": "EXTERNAL", "color": (255, 200, 150),
         "contours": body_slices(zs, face_section)},
        {"number": 2, "name": "PTV_cheek", "type": "PTV", "color": (255, 0, 0),
         "contours": rb.ellipsoid(inward(iso, gantry, 14.0), (8.0, 5.0, 11.0), step)},
        {"number": 3, "name": "Lens_L", "type": "ORGAN", "color": (0, 255, 255),
         "contours": rb.ellipsoid((32.0, -76.0, 25.0), (4.5, 2.0, 4.5), step, n=32)},
        {"number": 4, "name": "Lens_R", "type": "ORGAN", "color": (0, 200, 255),
         "contours": rb.ellipsoid((-32.0, -76.0, 25.0), (4.5, 2.0, 4.5), step, n=32)},
        {"number": 5, "name": "Eye_L", "type": "ORGAN", "color": (0, 128, 255),
         "contours": rb.ellipsoid((32.0, -67.0, 25.0), (11.5, 11.5, 11.5), step)},
        {"number": 6, "name": "Eye_R", "type": "ORGAN", "color": (0, 100, 255),
         "contours": rb.ellipsoid((-32.0, -67.0, 25.0), (11.5, 11.5, 11.5), step)},
        {"number": 7, "name": "Parotid_L", "type": "ORGAN", "color": (255, 128, 0),
         "contours": rb.ellipsoid((50.0, 0.0, -35.0), (12.0, 18.0, 20.0), step)},
        {"number": 8, "name": "Parotid_R", "type": "ORGAN", "color": (255, 160, 0),
         "contours": rb.ellipsoid((-50.0, 0.0, -35.0), (12.0, 18.0, 20.0), step)},
        {"number": 9, "name": "Thyroid", "type": "ORGAN", "color": (160, 0, 255),
         "contours": rb.ellipsoid((15.0, -28.0, -150.0), (8.0, 9.0, 20.0), step)
         + rb.ellipsoid((-15.0, -28.0, -150.0), (8.0, 9.0, 20.0), step)},
    ]
    ss = rb.structure_dataset(patient, label="FACE_LENS", rois=rois, frame_uid=frame,
                              seed="face-lens-ss")
    cutout = [(-22, -14), (-10, -19), (8, -18), (21, -10), (23, 4), (15, 16), (0, 19),
              (-14, 15), (-23, 3)]
    beam = {"number": 1, "name": "E09 L CHEEK", "description": "left cheek skin lesion",
            "energy_mev": 9.0, "gantry": gantry, "collimator": 0.0, "couch": 0.0,
            "iso_mm": [round(v, 2) for v in iso], "ssd_mm": 1000.0,
            "applicator": {"id": "A06", "type": "ELECTRON_SQUARE",
                           "description": "6 x 6 cm applicator"},
            "blocks": [{"points_mm": cutout, "name": "CHEEK CUTOUT", "tray_id": "A06-CUT",
                        "material": "LMA", "thickness_mm": 10.0}],
            "setup": 1}
    setup_beam = {"number": 2, "name": "SETUP AP", "delivery": "SETUP", "radiation_type": "PHOTON",
                  "energy_mev": 6.0, "gantry": 0.0, "iso_mm": [round(v, 2) for v in iso],
                  "setup": 1}
    plan = rb.plan_dataset(
        patient, label="FACE_E09", name="left cheek 45 Gy / 15 fx", frame_uid=frame,
        structure_set_uid=ss.SOPInstanceUID, beams=[beam, setup_beam],
        setups=[{"number": 1, "position": "HFS"}],
        fraction_groups=[{"number": 1, "fractions": 15, "beams": [(1, 350.0, 3.0), (2, 0.0)]}],
        dose_refs=[{"prescription_gy": 45.0, "description": "cheek lesion, 90 % isodose"}],
        seed="face-lens-plan")
    write_case(outdir, "face-lens", plan, ss)


# --------------------------------------------------------- chest-fetus --

def trunk_section_pregnant(z):
    if z > 150.0 or z < -700.0:
        return None
    if z > -350.0:
        return (0.0, 0.0, 160.0, 110.0)
    # the abdomen of a pregnant patient is deeper anteriorly
    return (0.0, -12.0, 155.0, 125.0)


def chest_fetus(outdir):
    patient = {"name": "DEMO^PREGNANT", "id": "DEMO-FETUS-02", "sex": "F", "birth_date": "19950101"}
    frame = rb.uid("chest-fetus", "frame")
    step = 5.0
    zs = rb.slices(-700.0, 150.0, step)
    gantry = 25.0
    z_field = -50.0
    s = trunk_section_pregnant(z_field)
    iso = surface_iso(gantry, (80.0, -60.0), z_field, (s[0], s[1]), s[2], s[3])
    rois = [
        {"number": 1, "name": "External", "type": "EXTERNAL", "color": (255, 200, 150),
         "contours": body_slices(zs, trunk_section_pregnant)},
        {"number": 2, "name": "CTV_boost", "type": "CTV", "color": (255, 0, 0),
         "contours": rb.ellipsoid(inward(iso, gantry, 16.0), (20.0, 6.0, 25.0), step)},
        {"number": 3, "name": "Fetus", "type": "ORGAN", "color": (255, 0, 255),
         "contours": rb.ellipsoid((0.0, -40.0, -520.0), (40.0, 32.0, 45.0), step)},
        {"number": 4, "name": "Uterus", "type": "ORGAN", "color": (200, 0, 200),
         "contours": rb.ellipsoid((0.0, -35.0, -515.0), (70.0, 55.0, 75.0), step)},
        {"number": 5, "name": "Breast_R", "type": "ORGAN", "color": (255, 150, 200),
         "contours": rb.ellipsoid((-70.0, -75.0, -40.0), (40.0, 15.0, 40.0), step)},
        {"number": 6, "name": "Thyroid", "type": "ORGAN", "color": (160, 0, 255),
         "contours": rb.ellipsoid((15.0, -60.0, 120.0), (8.0, 9.0, 20.0), step)
         + rb.ellipsoid((-15.0, -60.0, 120.0), (8.0, 9.0, 20.0), step)},
        {"number": 7, "name": "Heart", "type": "ORGAN", "color": (200, 0, 0),
         "contours": rb.ellipsoid((20.0, -10.0, -190.0), (55.0, 45.0, 55.0), step)},
        {"number": 8, "name": "Fetus_landmark", "type": "MARKER", "color": (255, 255, 0),
         "contours": rb.point(0.0, -45.0, -480.0)},
    ]
    ss = rb.structure_dataset(patient, label="CHEST_FETUS", rois=rois, frame_uid=frame,
                              seed="chest-fetus-ss")
    beam = {"number": 1, "name": "E12 L CW BOOST", "description": "left chest wall scar boost",
            "energy_mev": 12.0, "gantry": gantry, "collimator": 0.0, "couch": 0.0,
            "iso_mm": [round(v, 2) for v in iso], "ssd_mm": 1000.0,
            "applicator": {"id": "A10", "type": "ELECTRON_SQUARE",
                           "geometry": {"shape": "SYM_SQUARE", "opening": 100.0}},
            "setup": 1}
    plan = rb.plan_dataset(
        patient, label="CW_BOOST_E12", name="chest wall boost 10 Gy / 5 fx", frame_uid=frame,
        structure_set_uid=ss.SOPInstanceUID, beams=[beam],
        setups=[{"number": 1, "position": "HFS"}],
        fraction_groups=[{"number": 1, "fractions": 5, "beams": [(1, 222.0, 2.0)]}],
        dose_refs=[{"prescription_gy": 10.0, "description": "chest wall boost, 90 % isodose"}],
        seed="chest-fetus-plan")
    write_case(outdir, "chest-fetus", plan, ss)


# --------------------------------------------------------- neck-device --

def trunk_section_device(z):
    if z < -420.0 or z > 200.0:
        return None
    if z > -40.0:
        return (0.0, 10.0, 60.0, 62.0)  # neck
    return (0.0, 0.0, 170.0, 110.0)


def neck_device(outdir):
    patient = {"name": "DEMO^PACER", "id": "DEMO-DEVICE-03", "sex": "M", "birth_date": "19480101"}
    frame = rb.uid("neck-device", "frame")
    step = 5.0
    zs = rb.slices(-420.0, 200.0, step)
    gantry = 10.0
    z_field = -80.0
    s = trunk_section_device(z_field)
    iso = surface_iso(gantry, (60.0, -60.0), z_field, (s[0], s[1]), s[2], s[3])
    device_box = rb.box(35.0, 85.0, -95.0, -87.0, -195.0, -150.0, step)
    rois = [
        {"number": 1, "name": "BODY", "type": "EXTERNAL", "color": (255, 200, 150),
         "contours": body_slices(zs, trunk_section_device)},
        {"number": 2, "name": "PTV_SCV", "type": "PTV", "color": (255, 0, 0),
         "contours": rb.ellipsoid(inward(iso, gantry, 14.0), (25.0, 9.0, 20.0), step)},
        {"number": 3, "name": "Pacemaker", "type": "AVOIDANCE", "color": (255, 255, 0),
         "contours": device_box},
        {"number": 4, "name": "Thyroid", "type": "ORGAN", "color": (160, 0, 255),
         "contours": rb.ellipsoid((15.0, -35.0, 10.0), (8.0, 9.0, 20.0), step)
         + rb.ellipsoid((-15.0, -35.0, 10.0), (8.0, 9.0, 20.0), step)},
        {"number": 5, "name": "Heart", "type": "ORGAN", "color": (200, 0, 0),
         "contours": rb.ellipsoid((20.0, -10.0, -260.0), (55.0, 45.0, 55.0), step)},
        {"number": 6, "name": "Lung_L", "type": "ORGAN", "color": (0, 160, 255),
         "contours": rb.ellipsoid((85.0, 0.0, -240.0), (55.0, 65.0, 110.0), step)},
    ]
    ss = rb.structure_dataset(patient, label="NECK_DEVICE", rois=rois, frame_uid=frame,
                              seed="neck-device-ss")
    cutout = [(-35, -28), (35, -28), (38, 0), (35, 28), (-35, 28), (-40, 0)]
    beam = {"number": 1, "name": "E09 L SCV", "description": "left supraclavicular boost",
            "energy_mev": 9.0, "gantry": gantry, "collimator": 0.0, "couch": 0.0,
            "iso_mm": [round(v, 2) for v in iso], "ssd_mm": 1000.0,
            "applicator": {"id": "A10", "type": "ELECTRON_SQUARE"},
            "blocks": [{"points_mm": cutout, "name": "SCV CUTOUT", "tray_id": "A10-CUT",
                        "material": "LMA", "thickness_mm": 10.0}],
            "setup": 1}
    plan = rb.plan_dataset(
        patient, label="SCV_E09", name="supraclavicular boost 12 Gy / 6 fx", frame_uid=frame,
        structure_set_uid=ss.SOPInstanceUID, beams=[beam],
        setups=[{"number": 1, "position": "HFS"}],
        fraction_groups=[{"number": 1, "fractions": 6, "beams": [(1, 235.0, 2.0)]}],
        dose_refs=[{"prescription_gy": 12.0, "description": "supraclavicular boost, 90 % isodose"}],
        seed="neck-device-plan")
    write_case(outdir, "neck-device", plan, ss)


# ------------------------------------------------------- chest-oblique --

def trunk_section_plain(z):
    if z < -450.0 or z > 150.0:
        return None
    if z > 60.0:
        return (0.0, 10.0, 60.0, 62.0)  # neck
    return (0.0, 0.0, 165.0, 110.0)


def chest_oblique(outdir):
    """An oblique beam at extended SSD: the skin 5 cm beyond the isocentre
    (SSD 105 cm), the gantry at 12 deg on the anterior chest, so that the
    beam leans toward the patient's right; a breast on either side."""
    patient = {"name": "DEMO^OBLIQUE", "id": "DEMO-OBLIQUE-04", "sex": "M",
               "birth_date": "19600101"}
    frame = rb.uid("chest-oblique", "frame")
    step = 5.0
    zs = rb.slices(-450.0, 150.0, step)
    gantry = 12.0
    z_field = -120.0
    s = trunk_section_plain(z_field)
    skin = surface_iso(gantry, (0.0, -60.0), z_field, (s[0], s[1]), s[2], s[3])
    u = toward_source(gantry)
    iso = [skin[0] + 50.0 * u[0], skin[1] + 50.0 * u[1], z_field]
    rois = [
        {"number": 1, "name": "BODY", "type": "EXTERNAL", "color": (255, 200, 150),
         "contours": body_slices(zs, trunk_section_plain)},
        {"number": 2, "name": "PTV_sternum", "type": "PTV", "color": (255, 0, 0),
         "contours": rb.ellipsoid(inward(skin, gantry, 12.0), (25.0, 6.0, 25.0), step)},
        {"number": 3, "name": "Breast_L", "type": "ORGAN", "color": (255, 150, 200),
         "contours": rb.ellipsoid((100.0, -62.0, -120.0), (25.0, 12.0, 30.0), step)},
        {"number": 4, "name": "Breast_R", "type": "ORGAN", "color": (255, 120, 180),
         "contours": rb.ellipsoid((-100.0, -62.0, -120.0), (25.0, 12.0, 30.0), step)},
        {"number": 5, "name": "Thyroid", "type": "ORGAN", "color": (160, 0, 255),
         "contours": rb.ellipsoid((15.0, -35.0, 100.0), (8.0, 9.0, 20.0), step)
         + rb.ellipsoid((-15.0, -35.0, 100.0), (8.0, 9.0, 20.0), step)},
        {"number": 6, "name": "Heart", "type": "ORGAN", "color": (200, 0, 0),
         "contours": rb.ellipsoid((20.0, -10.0, -240.0), (55.0, 45.0, 55.0), step)},
    ]
    ss = rb.structure_dataset(patient, label="CHEST_OBLIQUE", rois=rois, frame_uid=frame,
                              seed="chest-oblique-ss")
    beam = {"number": 1, "name": "E09 STERNUM", "description": "sternal skin lesion, SSD 105",
            "energy_mev": 9.0, "gantry": gantry, "collimator": 0.0, "couch": 0.0,
            "iso_mm": [round(v, 2) for v in iso], "ssd_mm": 1050.0,
            "applicator": {"id": "A10", "type": "ELECTRON_SQUARE"},
            "setup": 1}
    plan = rb.plan_dataset(
        patient, label="STERNUM_E09", name="sternal lesion 40 Gy / 10 fx", frame_uid=frame,
        structure_set_uid=ss.SOPInstanceUID, beams=[beam],
        setups=[{"number": 1, "position": "HFS"}],
        fraction_groups=[{"number": 1, "fractions": 10, "beams": [(1, 480.0, 4.0)]}],
        dose_refs=[{"prescription_gy": 40.0, "description": "sternal lesion, 90 % isodose"}],
        seed="chest-oblique-plan")
    write_case(outdir, "chest-oblique", plan, ss)


def write_case(outdir, name, plan, ss):
    d = os.path.join(outdir, name)
    os.makedirs(d, exist_ok=True)
    rb.save(ss, os.path.join(d, "rtstruct.dcm"))
    rb.save(plan, os.path.join(d, "rtplan.dcm"))


def main():
    outdir = sys.argv[1] if len(sys.argv) > 1 else os.path.join(
        os.path.dirname(os.path.abspath(__file__)), "..")
    face_lens(outdir)
    chest_fetus(outdir)
    neck_device(outdir)
    chest_oblique(outdir)


if __name__ == "__main__":
    main()
