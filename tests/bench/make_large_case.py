#!/usr/bin/python3
"""Write the large benchmark case as DICOM files: an RT Structure Set of 40
ROIs over 200 slices with about 0.85 million contour points (about 19 MB) and
an RT Plan of three 9 / 12 MeV electron beams with 200-vertex cutouts.

INVENTED DATA, NOT A REAL PATIENT, NOT FOR CLINICAL USE. The shapes are those
of tests/bench/bench_locate.c (a body, a 5 L organ, a 1.5 L organ, 37 small
organs down to 0.1 cm3, contours a little wavy), written with pydicom through
the demo generator's helpers; coordinates carry 0.01 mm, as planning systems
commonly write them (common practice).

Run: /usr/bin/python3 tests/bench/make_large_case.py OUTDIR
"""
import math
import os
import sys

import numpy as np

HERE = os.path.dirname(os.path.abspath(__file__))
sys.path.insert(0, os.path.join(HERE, "..", "..", "examples", "generator"))
import rtbuild as rb  # noqa: E402
from make_cases import surface_iso  # noqa: E402

PATIENT = {"name": "DEMO^BENCHMARK", "id": "DEMO-BENCH-00", "sex": "F",
           "birth_date": "19700101"}
STEP = 2.5  # mm between slices: 200 slices over 50 cm


def roi_contours(cx, cy, cz, ax, ay, half_len, npts, round_):
    out = []
    ns = int(math.floor(half_len / STEP))
    a = 2 * math.pi * np.arange(npts) / npts
    for k in range(-ns, ns + 1):
        z = cz + k * STEP
        f = math.sqrt(max(0.0, 1 - (k * STEP / (half_len + STEP)) ** 2)) if round_ else 1.0
        if f < 0.05:
            continue
        w = 1 + 0.03 * np.sin(7 * a + k)
        pts = np.column_stack([cx + ax * f * w * np.cos(a), cy + ay * f * w * np.sin(a),
                               np.full(npts, z)])
        out.append(("CLOSED_PLANAR", np.round(pts, 2)))
    return out


def ds_fast(values):
    """DS strings of numbers already rounded to 0.01 mm ("%.2f" is exact
    enough and at most 16 characters for |v| < 1e12)."""
    return ["%.2f" % v for v in values]


def main():
    outdir = sys.argv[1] if len(sys.argv) > 1 else "."
    os.makedirs(outdir, exist_ok=True)
    rois = [{"number": 1, "name": "BODY", "type": "EXTERNAL",
             "contours": roi_contours(0, 0, 0, 175, 125, 249, 2500, False)},
            {"number": 2, "name": "Organ_5L", "type": "ORGAN",
             "contours": roi_contours(20, 10, -60, 110, 80, 120, 2000, True)},
            {"number": 3, "name": "Organ_1500cc", "type": "ORGAN",
             "contours": roi_contours(-70, 20, 80, 70, 55, 95, 1500, True)}]
    for i in range(3, 40):
        r = 22.0 * 0.84 ** (i - 3) + 2.2
        a = 2 * math.pi * i / 37
        rois.append({"number": i + 1, "name": "Small_%02d" % i, "type": "ORGAN",
                     "contours": roi_contours(110 * math.cos(a), 70 * math.sin(a) - 20,
                                              -200 + 11 * i, r, r * 0.8, r, 200, True)})
    npoints = sum(len(p) for r in rois for _, p in r["contours"])
    frame = rb.uid("bench", "frame")
    saved = rb.ds
    rb.ds = ds_fast  # the generator's general formatting is slow at this size
    try:
        ss = rb.structure_dataset(PATIENT, label="BENCH", rois=rois, frame_uid=frame,
                                  seed="bench-ss")
    finally:
        rb.ds = saved
    beams = []
    for i, (gantry, energy) in enumerate(((0.0, 9.0), (40.0, 12.0), (320.0, 9.0))):
        # the body's wavy section is within 3 % of the ellipse at the surface
        iso = surface_iso(gantry, (0.0, -40.0), 20.0 * i, (0.0, 0.0), 175.0, 125.0)
        t = 2 * math.pi * np.arange(200) / 200
        r = 0.9 * (40 + 8 * np.sin(5 * t) + 3 * np.cos(11 * t))
        cutout = np.round(np.column_stack([r * np.cos(t), r * np.sin(t)]), 2).tolist()
        beams.append({"number": i + 1, "name": "E%02d BENCH %d" % (energy, i + 1),
                      "energy_mev": energy, "gantry": gantry, "collimator": 0.0, "couch": 0.0,
                      "iso_mm": [round(v, 2) for v in iso], "ssd_mm": None,
                      "applicator": {"id": "A10", "type": "ELECTRON_SQUARE"},
                      "blocks": [{"points_mm": cutout}], "setup": 1})
    plan = rb.plan_dataset(
        PATIENT, label="BENCH", name="benchmark 3 fields", frame_uid=frame,
        structure_set_uid=ss.SOPInstanceUID, beams=beams,
        fraction_groups=[{"number": 1, "fractions": 10,
                          "beams": [(b["number"], 200.0) for b in beams]}],
        seed="bench-plan")
    rb.save(ss, os.path.join(outdir, "rtstruct.dcm"))
    rb.save(plan, os.path.join(outdir, "rtplan.dcm"))
    print("%s: %d ROIs, %d contour points, %.1f MB" % (
        os.path.join(outdir, "rtstruct.dcm"), len(rois), npoints,
        os.path.getsize(os.path.join(outdir, "rtstruct.dcm")) / 1e6))


if __name__ == "__main__":
    main()
