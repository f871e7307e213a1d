"""Beam tilt and SSD as model dimensions, against outside references:

- a synthetic measurement set whose profiles come from a known analytic
  function of distance, tilt and SSD (written here, noise-free): between the
  commissioned tilts and SSDs the evaluation agrees with an independent
  log-linear interpolation of the truth (numpy.interp) and lies within the
  stated interpolation uncertainty (k = 2) of the truth itself;
- the documented rules beyond the commissioned tilts and SSDs (tolerance
  2 deg and 2 cm, 2 % a degree or cm of uncertainty, the marks);
- a box phantom written with pydicom and turned by a gantry angle: the tilt
  toward a point equals the angle worked out by hand, with the sign of the
  side the point lies on (hand geometry, IEC 61217 gantry sense);
- a version-1 model file: it still loads and gives the numbers strayline
  3fc4191 (the last version of format 1 only) gave for it, key for key;
- the oblique-incidence caution (above 45 deg, common practice) in every
  estimate format.
"""
import csv
import json
import math
import os
import unittest

import numpy as np
import yaml

from common import SOURCE_ROOT, run, run_json, tempdir
import rtbuild as rb  # noqa: E402

PATIENT = {"name": "DEMO^TILT", "id": "DEMO-TILT-00"}
TILTS = [-10.0, 0.0, 10.0]
SSDS = [100.0, 110.0]


def truth(d, tilt, ssd):
    """The known function (percent of the central-axis maximum): the smooth
    two-exponential form of models/README.md whose near term grows and
    lengthens with tilt and air gap, invented for this test."""
    g = ssd - 100.0
    a = 20.0 * math.exp(0.03 * tilt) * (1 + 0.01 * g)
    l1 = 0.8 * (1 + 0.012 * tilt + 0.0005 * tilt * tilt) * (1 + 0.02 * g)
    c = 1.0 * (1 + 0.005 * g)
    return a * math.exp(-d / l1) + c * math.exp(-d / 12.0)


def distances():
    out, d = [], 0.0
    while d <= 30.0 + 1e-9:
        out.append(round(d, 3))
        d += 0.25 if d < 5 else 1.0
    return out


def write_set(d):
    """Profiles at 1 cm depth: every tilt at 100 cm, tilt 0 at 110 cm."""
    os.makedirs(os.path.join(d, "p"))
    profiles = []
    grid = [(t, 100.0) for t in TILTS] + [(0.0, 110.0)]
    for t, s in grid:
        name = "p/t%+03d_s%d.csv" % (t, s)
        with open(os.path.join(d, name), "w", newline="") as f:
            w = csv.writer(f, lineterminator="\n")
            w.writerow(["edge_distance_cm", "dose_percent"])
            for x in distances():
                w.writerow(["%g" % x, "%.9g" % truth(x, t, s)])
        profiles.append({"energy_mev": 9, "applicator": "A10", "insert": "open", "depth_cm": 1.0,
                         "direction": "crossplane", "file": name, "tilt_deg": t, "ssd_cm": s,
                         "uncertainty": {"relative": 0.02, "floor_percent": 0.001}})
    doc = {"format": "strayline-measurements", "format_version": 2,
           "notice": "INVENTED TEST DATA - NOT FOR CLINICAL USE",
           "machine": {"name": "TEST-TILT", "nominal_ssd_cm": 100, "sad_cm": 100,
                       "invented": True},
           "measured": {"date": "2026-12-02", "by": "test (invented)", "detector": "none"},
           "reference": "percent of the central-axis maximum at the profile's SSD",
           "applicators": [{"id": "A10", "shape": "square", "field_x_cm": 10,
                            "field_y_cm": 10}],
           "outputs": [{"energy_mev": 9, "applicator": "A10", "dose_per_mu_cgy": 1.0,
                        "dmax_cm": 2.0, "effective_ssd_cm": 95.0}],
           "profiles": profiles}
    path = os.path.join(d, "ms.yaml")
    with open(path, "w") as f:
        yaml.safe_dump(doc, f, sort_keys=False)
    model = os.path.join(d, "model.yaml")
    run("fit", path, "-o", model, "--model-version", "t", "--created", "2026-12-02T00:00:00Z",
        "-q", check=0)
    return model


def evaluate(model, x, tilt=None, ssd=None):
    args = ["model", "eval", model, "-e", "9", "-a", "A10", "-d", "1", "-x", x, "--format", "json"]
    if tilt is not None:
        args += ["--tilt", tilt]
    if ssd is not None:
        args += ["--ssd", ssd]
    return run_json(*args)


class SyntheticGrid(unittest.TestCase):
    @classmethod
    def setUpClass(cls):
        cls.tmp = tempdir()
        cls.model = write_set(cls.tmp.name)

    @classmethod
    def tearDownClass(cls):
        cls.tmp.cleanup()

    def test_model_file_is_version_2_with_tilts_and_ssds(self):
        with open(self.model) as f:
            doc = yaml.safe_load(f)
        self.assertEqual(doc["format_version"], 2)
        got = sorted((p["tilt_deg"], p["ssd_cm"]) for p in doc["profiles"])
        self.assertEqual(got, sorted([(t, 100.0) for t in TILTS] + [(0.0, 110.0)]))

    def test_grid_points_read_the_truth(self):
        """At a commissioned tilt and SSD the fit of noise-free points of the
        smooth form reproduces them (0.5 %, the fit's numerical tolerance)."""
        for t, s in [(-10, 100), (0, 100), (10, 100), (0, 110)]:
            for x in (0.5, 2.0, 6.0, 20.0):
                v = evaluate(self.model, x, t, s)
                want = truth(x, t, s)
                self.assertAlmostEqual(v["dose_percent"] / want, 1.0, delta=0.005,
                                       msg="tilt %g ssd %g x %g" % (t, s, x))
                self.assertEqual(v["flags"], [])
                self.assertEqual(v["uncertainty_tilt_ssd_percent"], 0)

    def test_between_tilts_and_ssds(self):
        """Between grid points: (1) equal to numpy's log-linear interpolation
        of the truth at the neighbouring grid points (an independent
        reimplementation of the rule), (2) within twice the stated
        interpolation uncertainty of the truth itself."""
        cases = [(t, 100.0) for t in (-7.5, -5.0, -2.5, 2.5, 5.0, 7.5)] + \
                [(0.0, s) for s in (102.5, 105.0, 107.5)]
        for t, s in cases:
            for x in (0.5, 1.0, 2.0, 4.0, 8.0, 20.0):
                v = evaluate(self.model, x, t, s)
                if s == 100.0:
                    lin = math.exp(np.interp(t, TILTS, [math.log(truth(x, g, 100.0))
                                                       for g in TILTS]))
                else:
                    lin = math.exp(np.interp(s, SSDS, [math.log(truth(x, 0.0, g))
                                                      for g in SSDS]))
                msg = "tilt %g ssd %g x %g" % (t, s, x)
                self.assertAlmostEqual(v["dose_percent"] / lin, 1.0, delta=0.005, msg=msg)
                err = abs(v["dose_percent"] - truth(x, t, s))
                self.assertLessEqual(err, 2 * v["uncertainty_interpolation_percent"] +
                                     0.005 * truth(x, t, s), msg=msg)
                self.assertGreater(v["uncertainty_interpolation_percent"], 0, msg=msg)
                self.assertEqual(v["flags"], [], msg=msg)

    def test_beyond_the_commissioned_tilts(self):
        """Within 2 deg of the last tilt: the nearest, unmarked; beyond it the
        nearest, marked, with 2 % of the value a degree beyond it
        (models/README.md)."""
        near = evaluate(self.model, 3.0, 11.5)
        edge = evaluate(self.model, 3.0, 10)
        self.assertEqual(near["flags"], [])
        self.assertEqual(near["dose_percent"], edge["dose_percent"])
        for t in (14.0, -25.0, 48.9):
            v = evaluate(self.model, 3.0, t)
            self.assertIn("tilt_not_commissioned", v["flags"])
            nearest = 10.0 if t > 0 else -10.0
            ref = evaluate(self.model, 3.0, nearest)
            self.assertEqual(v["dose_percent"], ref["dose_percent"])
            self.assertEqual(v["tilt_used_deg"], nearest)
            want = 0.02 * abs(t - nearest) * v["dose_percent"]
            self.assertAlmostEqual(v["uncertainty_tilt_ssd_percent"], want, places=9)
            self.assertGreater(v["uncertainty_percent"], ref["uncertainty_percent"])

    def test_beyond_the_commissioned_ssds(self):
        for s, nearest in ((115.0, 110.0), (95.0, 100.0)):
            v = evaluate(self.model, 3.0, 0, s)
            self.assertIn("ssd_not_commissioned", v["flags"])
            self.assertEqual(v["ssd_used_cm"], nearest)
            want = 0.02 * abs(s - nearest) * v["dose_percent"]
            self.assertAlmostEqual(v["uncertainty_tilt_ssd_percent"], want, places=9)
        self.assertEqual(evaluate(self.model, 3.0, 0, 111.5)["flags"], [])


def box(d, gantry, points):
    """A water box, anterior surface at y = 0 (HFS, mm), isocentre on the
    surface, a 10 x 10 cm cutout on A10 at 9 MeV, SSD 100 cm."""
    rois = [{"number": 1, "name": "BODY", "type": "EXTERNAL",
             "contours": rb.box(-350.0, 350.0, 0.0, 200.0, -150.0, 150.0, 5.0)}]
    for i, (name, p) in enumerate(points):
        rois.append({"number": i + 2, "name": name, "type": "ORGAN", "contours": rb.point(*p)})
    frame = rb.uid("tilt", d, "frame")
    ss = rb.structure_dataset(PATIENT, label="BOX", rois=rois, frame_uid=frame,
                              seed="tilt-ss-" + d)
    beam = {"number": 1, "energy_mev": 9.0, "gantry": gantry, "iso_mm": [0.0, 0.0, 0.0],
            "ssd_mm": 1000.0, "setup": 1, "applicator": {"id": "A10", "type": "ELECTRON_SQUARE"},
            "blocks": [{"points_mm": rb.square_cutout(50.0)}]}
    plan = rb.plan_dataset(PATIENT, label="BOX", frame_uid=frame,
                           structure_set_uid=ss.SOPInstanceUID, beams=[beam],
                           seed="tilt-plan-" + d)
    rb.save(ss, os.path.join(d, "ss.dcm"))
    rb.save(plan, os.path.join(d, "plan.dcm"))
    return os.path.join(d, "plan.dcm"), os.path.join(d, "ss.dcm")


class BoxPhantomTilt(unittest.TestCase):
    def test_tilt_toward_each_side(self):
        """HFS, gantry G: the source turns toward the patient's left (+x,
        IEC 61217 gantry sense for HFS), so the beam travels toward the
        patient's right along the flat anterior surface. Hand geometry: the
        surface normal makes the angle G with the central axis (the
        obliquity); a point on the right (-x), in the plane of the turn, is on
        the side the beam leans toward (tilt +G), one on the left (+x) on the
        side it leans away from (tilt -G), one toward the head (+z, across the
        plane of the turn) at tilt 0."""
        for g in (10.0, 30.0, 48.9):
            with tempdir() as d:
                # "head": 1 cm down the central axis, then 12 cm toward the
                # head, so that it lies across the plane of the turn
                r = math.radians(g)
                pts = [("right", (-150.0, 10.0, 0.0)), ("left", (150.0, 10.0, 0.0)),
                       ("head", (-10.0 * math.sin(r), 10.0 * math.cos(r), 120.0))]
                plan, ss = box(d, g, pts)
                js = run_json("locate", "--format", "json", plan, ss)
            beam = js["beams"][0]
            self.assertAlmostEqual(beam["obliquity_deg"], g, delta=0.01)
            o = {x["roi"]: x for x in beam["organs"]}
            self.assertAlmostEqual(o["right"]["tilt_toward_nearest_deg"], g, delta=0.01)
            self.assertAlmostEqual(o["left"]["tilt_toward_nearest_deg"], -g, delta=0.01)
            self.assertAlmostEqual(o["head"]["tilt_toward_nearest_deg"], 0.0, delta=0.01)

    def test_oblique_incidence_caution_in_every_format(self):
        """Above 45 deg of obliquity (common practice) every format says so."""
        with tempdir() as d:
            plan, ss = box(d, 48.9, [("right", (-150.0, 10.0, 0.0))])
            model = os.path.join(SOURCE_ROOT, "models", "demo-e1.yaml")
            base = ["estimate", plan, ss, "--model", model]
            outs = {}
            for fmt in ("text", "json", "csv"):
                rc, out, err = run(*base, "--format", fmt)
                self.assertIn(rc, (0, 4), err)
                outs[fmt] = out
            html = os.path.join(d, "r.html")
            rc, out, err = run(*base, "--html", html)
            self.assertIn(rc, (0, 4), err)
            with open(html) as f:
                outs["html"] = f.read()
            for fmt, text in outs.items():
                self.assertIn("OBLIQUE INCIDENCE", text, fmt)
                self.assertIn("48.9 deg", text, fmt)
            js = json.loads(outs["json"])
            organ = [o for o in js["organs"] if o["roi"] == "right"][0]
            self.assertIn("tilt_not_commissioned", organ["flags"])
            self.assertIn("[tilt]", outs["text"])


class DemoObliqueCase(unittest.TestCase):
    def test_chest_oblique_reads_each_side_at_its_tilt(self):
        """examples/chest-oblique (invented): SSD 105 cm, gantry 12 deg. The
        beam leans toward the patient's right (IEC 61217 gantry sense for
        HFS), so the right breast is at a positive tilt and the left at the
        negative one of the same size (hand geometry: the same surface
        obliquity); both lie within the demo model's commissioned tilts
        (-15 to 15 deg) and SSDs (100, 110 cm), so neither is marked."""
        base = os.path.join(SOURCE_ROOT, "examples", "chest-oblique")
        plan, ss = os.path.join(base, "rtplan.dcm"), os.path.join(base, "rtstruct.dcm")
        model = os.path.join(SOURCE_ROOT, "models", "demo-e1.yaml")
        js = run_json("locate", "--format", "json", plan, ss, "--model", model)
        beam = js["beams"][0]
        self.assertAlmostEqual(beam["ssd_found_cm"], 105.0, delta=0.05)
        o = {x["roi"]: x for x in beam["organs"]}
        self.assertGreater(o["Breast_R"]["tilt_toward_nearest_deg"], 5)
        self.assertAlmostEqual(o["Breast_R"]["tilt_toward_nearest_deg"],
                               -o["Breast_L"]["tilt_toward_nearest_deg"], delta=0.01)
        self.assertAlmostEqual(o["Breast_R"]["tilt_toward_nearest_deg"], beam["obliquity_deg"],
                               delta=0.01)
        rc, out, err = run("estimate", plan, ss, "--model", model, "--prescription-isodose", "90",
                           "--format", "json")
        self.assertIn(rc, (0, 4), err)
        est = json.loads(out)
        self.assertEqual(est["beams"][0]["commissioned_ssds_cm"], [100, 110])
        for name in ("Breast_L", "Breast_R"):
            flags = [x for x in est["organs"] if x["roi"] == name][0]["flags"]
            self.assertNotIn("tilt_not_commissioned", flags)
            self.assertNotIn("ssd_not_commissioned", flags)


class VersionOne(unittest.TestCase):
    def test_version_1_file_gives_identical_numbers(self):
        """tests/data/model-v1: a format-1 model file and what strayline
        3fc4191 printed for it (model eval --format json) at 225 points
        (open and the C6 insert, five depths, five distances, four
        directions, points mode): every key it printed is unchanged, but
        for the uncertainty of the 36 rows at 3 cm, beyond the file's
        deepest commissioned depth (2.25 cm), where the dose rising with
        depth is now continued as an extrapolation component (expected.json
        says so)."""
        here = os.path.join(SOURCE_ROOT, "tests", "data", "model-v1")
        with open(os.path.join(here, "expected.json")) as f:
            rows = json.load(f)["rows"]
        self.assertEqual(len(rows), 225)
        for r in rows:
            args = [os.path.join(SOURCE_ROOT, a) if a.endswith(".yaml") else a
                    for a in r["args"]]
            got = run_json(*args)
            for k, v in r["value"].items():
                self.assertEqual(got[k], v, "%s: %s" % (" ".join(r["args"]), k))
            self.assertEqual(got["tilt_used_deg"], 0)
            self.assertEqual(got["ssd_used_cm"], 100)

    def test_version_1_file_reads_as_tilt_0_at_nominal_ssd(self):
        path = os.path.join(SOURCE_ROOT, "tests", "data", "model-v1", "demo-e1-9mev-a10.yaml")
        v = run_json("model", "eval", path, "-e", "9", "-a", "A10", "-d", "1", "-x", "3",
                     "--tilt", "5", "--format", "json")
        self.assertIn("tilt_not_commissioned", v["flags"])
        self.assertEqual(v["tilt_used_deg"], 0)


if __name__ == "__main__":
    unittest.main()
