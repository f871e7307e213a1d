"""Commissioning against outside references:

- the profile fits of the demo model against scipy.optimize.curve_fit
  (Debian python3-scipy), an independent least-squares fitter started away
  from strayline's answer: the same parameters within 1e-4 relative;
- `strayline fit` on the shipped measurements reproduces the shipped model;
- `strayline model eval` on a hand-made two-depth model whose values are
  worked out here from the documented formulas (models/README.md);
- the fit report is one self-contained HTML file (Python's html.parser);
- the poor-fit test: on 1000 synthetic good profiles (numpy noise of the
  stated size about a known form) its false-alarm rate lies in the binomial
  band of its design rate (scipy.stats), and every profile's verdict agrees
  with the two limits recomputed by scipy.stats (chi-square and normal).
"""
import html.parser
import json
import csv
import math
import os
import shutil
import unittest

import numpy as np
import yaml
from scipy import stats
from scipy.optimize import curve_fit

from common import SOURCE_ROOT, run, run_json, tempdir

MODEL = os.path.join(SOURCE_ROOT, "models", "demo-e1.yaml")
MEAS = os.path.join(SOURCE_ROOT, "examples", "commissioning", "demo-e1", "measurements.yaml")
KEYS = ["a_percent", "lambda1_cm", "c_percent", "lambda2_cm", "b_percent", "mu_cm", "sigma_cm"]


def smooth(d, a, l1, c, l2):
    return a * np.exp(-d / l1) + c * np.exp(-d / l2)


def peaked(d, a, l1, c, l2, b, mu, s):
    return smooth(d, a, l1, c, l2) + b * np.exp(-((d - mu) ** 2) / (2 * s * s))


def load(path):
    with open(path) as f:
        return yaml.safe_load(f)


class AgainstScipy(unittest.TestCase):
    def test_profiles_refit_with_curve_fit(self):
        model = load(MODEL)
        checked = {"smooth": 0, "peaked": 0}
        for p in model["profiles"][::7]:
            pts = p["points"]
            d = np.array(pts["distance_cm"], float)
            y = np.array(pts["dose_percent"], float)
            u = p["uncertainty"]
            sigma = np.sqrt((u["relative"] * y) ** 2 + u["floor_percent"] ** 2)
            form = p["fit"]["form"]
            keys = KEYS[:4] if form == "smooth" else KEYS
            mine = np.array([p["fit"]["parameters"][k] for k in keys])
            f = smooth if form == "smooth" else peaked
            start = mine * np.array([1.1, 0.9, 1.1, 0.9, 1.1, 0.95, 1.1][:len(keys)])
            got, cov = curve_fit(f, d, y, p0=start, sigma=sigma, absolute_sigma=True,
                                 bounds=(0, np.inf), method="trf", xtol=1e-15, ftol=1e-15,
                                 gtol=1e-15, max_nfev=20000)
            chi_mine = float(np.sum(((y - f(d, *mine)) / sigma) ** 2))
            chi_scipy = float(np.sum(((y - f(d, *got)) / sigma) ** 2))
            self.assertAlmostEqual(chi_mine, p["fit"]["chi2"], delta=1e-6 * chi_mine)
            self.assertLessEqual(chi_mine, chi_scipy * (1 + 1e-9),
                                 "%s: scipy found a lower minimum" % p["data_file"])
            np.testing.assert_allclose(got, mine, rtol=1e-4,
                                       err_msg="%s (%s)" % (p["data_file"], form))
            checked[form] += 1
        self.assertGreater(checked["smooth"] + checked["peaked"], 20)
        self.assertGreater(checked["peaked"], 5)

    def test_covariance_matches_scipy(self):
        """With the stated sigmas trusted (absolute_sigma), curve_fit's
        covariance at strayline's minimum is the inverse of J^T W J; strayline
        scales it by max(1, reduced chi-square) (models/README.md)."""
        model = load(MODEL)
        p = model["profiles"][0]
        pts = p["points"]
        d = np.array(pts["distance_cm"], float)
        y = np.array(pts["dose_percent"], float)
        u = p["uncertainty"]
        sigma = np.sqrt((u["relative"] * y) ** 2 + u["floor_percent"] ** 2)
        form = p["fit"]["form"]
        keys = KEYS[:4] if form == "smooth" else KEYS
        f = smooth if form == "smooth" else peaked
        mine = np.array([p["fit"]["parameters"][k] for k in keys])
        _, cov = curve_fit(f, d, y, p0=mine, sigma=sigma, absolute_sigma=True, method="lm",
                           xtol=1e-15, ftol=1e-15, gtol=1e-15)
        scale = p["fit"]["covariance_scale"]
        np.testing.assert_allclose(np.array(p["fit"]["covariance"]), cov * scale, rtol=1e-3)


class ShippedModel(unittest.TestCase):
    def test_fit_reproduces_the_shipped_model(self):
        with tempdir() as t:
            out = os.path.join(t, "model.yaml")
            rep = os.path.join(t, "report.html")
            rc, so, se = run("fit", MEAS, "-o", out, "-r", rep, "--model-version", "2026.12-demo",
                             "--created", "2026-12-01T00:00:00Z", "-q")
            self.assertEqual(rc, 0, se)
            a, b = load(out), load(MODEL)
            self.assertEqual(len(a["profiles"]), len(b["profiles"]))
            for pa, pb in zip(a["profiles"], b["profiles"]):
                self.assertEqual(pa["fit"]["form"], pb["fit"]["form"], pa["data_file"])
                for k, v in pb["fit"]["parameters"].items():
                    self.assertAlmostEqual(pa["fit"]["parameters"][k], v, delta=1e-6 * abs(v))
                self.assertEqual(pa["data_sha256"], pb["data_sha256"])
            self.check_report(rep)

    def check_report(self, path):
        class Scan(html.parser.HTMLParser):
            def __init__(self):
                super().__init__()
                self.external, self.svgs, self.text = [], 0, []

            def handle_starttag(self, tag, attrs):
                a = dict(attrs)
                if tag == "svg":
                    self.svgs += 1
                for k in ("src", "href"):
                    v = a.get(k)
                    if v and not v.startswith("#"):
                        self.external.append(v)
                if tag == "link":
                    self.external.append(a.get("href"))

            def handle_data(self, data):
                self.text.append(data)

        s = Scan()
        with open(path) as f:
            s.feed(f.read())
        self.assertEqual(s.external, [])
        # one figure (small multiples) for each energy and applicator
        with open(MODEL) as f:
            groups = {(p["energy_mev"], p["applicator"]) for p in yaml.safe_load(f)["profiles"]}
        self.assertEqual(s.svgs, len(groups))
        text = "".join(s.text)
        self.assertIn("INVENTED DEMO DATA", text)
        self.assertIn("Poor fits", text)


def write_model(path, profiles, inserts=(), transfer=None, factors=None):
    machine = {"name": "HAND", "nominal_ssd_cm": 100, "sad_cm": 100}
    if transfer:
        machine["transfer_uncertainty"] = transfer
    output = {"energy_mev": 9, "applicator": "A10", "dose_per_mu_cgy": 1.0,
              "dmax_cm": 2.0, "effective_ssd_cm": 95.0}
    if factors:
        output["cutout_factors"] = [{"insert": k, "factor": v} for k, v in factors.items()]
    doc = {
        "format": "strayline-model", "format_version": 1, "model_version": "hand-made",
        "notice": "hand-made test model",
        "machine": machine,
        "applicators": [{"id": "A10", "shape": "square", "field_x_cm": 10, "field_y_cm": 10}],
        "inserts": [{"id": i, "applicator": "A10", "shape": "circle", "size_x_cm": 6,
                     "size_y_cm": 6, "profiles_relative_to": "insert_cax"} for i in inserts],
        "outputs": [output],
        "provenance": {"measurement_set": "none", "measurement_set_sha256": "0" * 64,
                       "tool": "test", "created": "2026-12-01", "measured_date": "2026-12-01",
                       "measured_by": "test", "detector": "none", "reference": "test"},
        "profiles": profiles,
    }
    with open(path, "w") as f:
        yaml.safe_dump(doc, f, sort_keys=False)


def smooth_profile(depth, a, l1, c, l2, var, rel=0.02, floor=0.01, direction="crossplane",
                   last=20, insert="open"):
    d = [float(x) for x in range(0, last + 1)]
    y = [a * math.exp(-x / l1) + c * math.exp(-x / l2) for x in d]
    cov = [[var if i == j else 0.0 for j in range(4)] for i in range(4)]
    return {"energy_mev": 9, "applicator": "A10", "insert": insert, "depth_cm": depth,
            "direction": direction, "data_file": "hand.csv", "data_sha256": "a" * 64,
            "uncertainty": {"relative": rel, "floor_percent": floor},
            "range_cm": [0.0, float(last)],
            "fit": {"form": "smooth",
                    "parameters": {"a_percent": a, "lambda1_cm": l1, "c_percent": c,
                                   "lambda2_cm": l2},
                    "covariance": cov, "covariance_scale": 1.0, "n": last + 1, "dof": last - 3,
                    "chi2": float(last - 3),
                    "chi2_reduced": 1.0, "aicc": 27.5, "rms_residual_percent": 0.0,
                    "max_residual_percent": 0.0, "rms_residual_relative": 0.0,
                    "max_residual_relative": 0.0, "max_residual_sigma": 0.0, "poor": False},
            "points": {"distance_cm": d, "dose_percent": y}}


class HandMadeModel(unittest.TestCase):
    """Two depths, 0 and 2 cm, smooth forms with a diagonal covariance; every
    expected value below follows from the formulas of models/README.md."""
    P0 = (40.0, 1.0, 2.0, 10.0)
    P2 = (30.0, 1.5, 1.5, 12.0)
    VAR = 1e-4

    @classmethod
    def setUpClass(cls):
        cls.tmp = tempdir()
        cls.path = os.path.join(cls.tmp.name, "hand.yaml")
        write_model(cls.path, [smooth_profile(0.0, *cls.P0, cls.VAR),
                               smooth_profile(2.0, *cls.P2, cls.VAR)], inserts=["C6"])

    @classmethod
    def tearDownClass(cls):
        cls.tmp.cleanup()

    def value(self, p, d):
        a, l1, c, l2 = p
        return a * math.exp(-d / l1) + c * math.exp(-d / l2)

    def ufit(self, p, d):
        a, l1, c, l2 = p
        g = [math.exp(-d / l1), a * math.exp(-d / l1) * d / l1 ** 2, math.exp(-d / l2),
             c * math.exp(-d / l2) * d / l2 ** 2]
        return math.sqrt(sum(x * x * self.VAR for x in g))

    def umeas(self, v):
        return math.sqrt((0.02 * v) ** 2 + 0.01 ** 2)

    def ev(self, *args):
        return run_json("model", "eval", self.path, "--format", "json", "-e", "9", "-a", "A10",
                        *args)

    def test_between_depths_log_linear(self):
        d, w = 5.0, 0.5
        v0, v2 = self.value(self.P0, d), self.value(self.P2, d)
        want = math.exp((1 - w) * math.log(v0) + w * math.log(v2))
        js = self.ev("-d", "1", "-x", "5")
        self.assertAlmostEqual(js["dose_percent"], want, delta=1e-9 * want)
        rf = (1 - w) * self.ufit(self.P0, d) / v0 + w * self.ufit(self.P2, d) / v2
        rm = (1 - w) * self.umeas(v0) / v0 + w * self.umeas(v2) / v2
        self.assertAlmostEqual(js["uncertainty_fit_percent"], rf * want, delta=1e-9)
        self.assertAlmostEqual(js["uncertainty_measurement_percent"], rm * want, delta=1e-9)
        interp = w * (1 - w) * abs(v2 - v0)
        self.assertAlmostEqual(js["uncertainty_interpolation_percent"], interp, delta=1e-9)
        # the transfer component: the built-in default band 5-15 cm, 40 % (the
        # model gives none; models/README.md states the defaults)
        self.assertAlmostEqual(js["uncertainty_transfer_percent"], 0.40 * want, delta=1e-9)
        total = math.sqrt((rf * want) ** 2 + (rm * want) ** 2 + interp ** 2 +
                          (0.40 * want) ** 2)
        self.assertAlmostEqual(js["uncertainty_percent"], total, delta=1e-9)
        self.assertEqual(js["flags"], [])
        # the electron part is the A term, the photon part the C term
        e = (1 - w) * (self.P0[0] * math.exp(-d / self.P0[1]) / v0) + \
            w * (self.P2[0] * math.exp(-d / self.P2[1]) / v2)
        self.assertAlmostEqual(js["electron_percent"], e * want, delta=1e-9)

    def test_at_a_measured_depth_no_interpolation(self):
        js = self.ev("-d", "2", "-x", "3")
        self.assertAlmostEqual(js["dose_percent"], self.value(self.P2, 3), delta=1e-9)
        self.assertEqual(js["uncertainty_interpolation_percent"], 0)

    def test_depth_outside_uses_the_nearest(self):
        js = self.ev("-d", "3.5", "-x", "4")
        self.assertAlmostEqual(js["dose_percent"], self.value(self.P2, 4), delta=1e-9)
        self.assertIn("depth_outside_commissioned_range", js["flags"])
        self.assertEqual(js["depth_used_cm"], 2)

    def test_beyond_the_range_holds_the_measured_floor(self):
        d = 26.0
        js = self.ev("-d", "0", "-x", str(d))
        # never below the farthest measured level: the mean of the last three
        # points (18, 19, 20 cm) or the fit at 20 cm, whichever is higher
        floor = max(sum(self.value(self.P0, x) for x in (18, 19, 20)) / 3,
                    self.value(self.P0, 20))
        v = max(self.value(self.P0, d), floor)
        self.assertGreater(v, self.value(self.P0, d))
        self.assertAlmostEqual(js["dose_percent"], v, delta=1e-9)
        self.assertIn("extrapolated", js["flags"])
        # 2 % per cm beyond the last measured point (20 cm)
        self.assertAlmostEqual(js["uncertainty_extrapolation_percent"], 0.02 * 6 * v, delta=1e-9)
        # the default transfer uncertainty's band 15-30 cm: 60 %
        self.assertAlmostEqual(js["uncertainty_transfer_percent"], 0.6 * v, delta=1e-9)

    def test_inside_the_field_gives_no_number(self):
        js = self.ev("-d", "1", "-x", "-0.5")
        self.assertIsNone(js["dose_percent"])
        self.assertIn("in_field", js["flags"])

    def test_uncommissioned_cutout_takes_the_open_profiles(self):
        js = self.ev("-d", "0", "-x", "2", "-i", "C6")
        self.assertAlmostEqual(js["dose_percent"], self.value(self.P0, 2), delta=1e-9)
        self.assertIn("standin_for_uncommissioned_cutout", js["flags"])

    def test_points_mode_hits_the_points(self):
        js = self.ev("-d", "0", "-x", "7", "--points")
        self.assertAlmostEqual(js["dose_percent"], self.value(self.P0, 7), delta=1e-9)
        self.assertIn("points_mode", js["flags"])

    def test_energy_not_commissioned(self):
        rc, out, err = run("model", "eval", self.path, "-e", "12", "-a", "A10", "-d", "1",
                           "-x", "2")
        self.assertEqual(rc, 3)
        self.assertIn("12 MeV with applicator 'A10' is not commissioned", err)
        self.assertIn("9 MeV/A10", err)


class NearerTheEdgeThanMeasured(unittest.TestCase):
    """A peaked profile measured from 3 cm out, whose bump (mu 3.5 cm) makes
    the fitted form fall again toward the edge before its first point. The
    formulas of models/README.md (Distance) give the expected numbers: nearer
    the edge the first measured level rises on at the measured rise of the
    first three points (log slope per cm), flagged extrapolated, with the
    extrapolation component that rise times the distance from the first
    point (found by independent reviews: the fit read 2.6 times low at 1 cm
    from the edge, with no extrapolation component)."""
    T = {"a_percent": 0.5, "lambda1_cm": 1.0, "c_percent": 1.0, "lambda2_cm": 12.0,
         "b_percent": 3.0, "mu_cm": 3.5, "sigma_cm": 0.6}

    def f(self, d):
        t = self.T
        return (t["a_percent"] * math.exp(-d / t["lambda1_cm"]) +
                t["c_percent"] * math.exp(-d / t["lambda2_cm"]) +
                t["b_percent"] * math.exp(-0.5 * ((d - t["mu_cm"]) / t["sigma_cm"]) ** 2))

    def test_the_first_measured_level_holds_with_the_rise_as_uncertainty(self):
        d = [float(x) for x in range(3, 21)]
        y = [self.f(x) for x in d]
        prof = smooth_profile(0.0, 1, 1, 1, 1, 1e-4)
        prof["range_cm"] = [3.0, 20.0]
        prof["points"] = {"distance_cm": d, "dose_percent": y}
        prof["fit"].update({"form": "peaked", "parameters": dict(self.T), "n": len(d),
                            "dof": len(d) - 7, "chi2": float(len(d) - 7)})
        prof["fit"]["covariance"] = [[1e-6 if i == j else 0.0 for j in range(7)]
                                     for i in range(7)]
        with tempdir() as tmp:
            path = os.path.join(tmp, "near.yaml")
            write_model(path, [prof])
            rise = max(math.log(y[0] / y[2]) / 2.0, 0.02)
            for x in (0.0, 1.0, 2.5):
                js = run_json("model", "eval", path, "--format", "json", "-e", "9", "-a",
                              "A10", "-d", "0", "-x", str(x))
                self.assertLess(self.f(x), y[0])  # the fit alone reads low here
                want = y[0] * math.exp(rise * (3.0 - x))
                self.assertAlmostEqual(js["dose_percent"], want, delta=1e-9 * want)
                self.assertIn("extrapolated", js["flags"])
                self.assertAlmostEqual(js["uncertainty_extrapolation_percent"],
                                       rise * (3.0 - x) * want, delta=1e-9 * want)
            # measured points themselves are unchanged
            js = run_json("model", "eval", path, "--format", "json", "-e", "9", "-a", "A10",
                          "-d", "0", "-x", "4")
            self.assertAlmostEqual(js["dose_percent"], self.f(4.0), delta=1e-9)
            self.assertNotIn("extrapolated", js["flags"])


def demo_set_copy(d):
    """The shipped demo measurement set copied into d/set: (folder, its
    measurements.yaml, the document)."""
    dst = os.path.join(d, "set")
    shutil.copytree(os.path.join(SOURCE_ROOT, "examples", "commissioning", "demo-e1"), dst)
    ms = os.path.join(dst, "measurements.yaml")
    return dst, ms, load(ms)


def rewrite_profile(path, value):
    """Each point (x cm, dose) of a profile CSV becomes value(x, dose), left
    out where that is None; its header row."""
    with open(path) as f:
        rows = list(csv.reader(f))
    with open(path, "w", newline="") as f:
        w = csv.writer(f)
        w.writerow(rows[0])
        for r in rows[1:]:
            v = float(r[1])
            nv = value(float(r[0]), v)
            if nv is not None:
                w.writerow([r[0], r[1] if nv == v else repr(nv)])
    return rows[0]


def scale_profile(path, factor, start=None):
    """Every dose of a profile CSV times factor, the points before start
    (cm) left out; its header row."""
    return rewrite_profile(path, lambda x, v: v * factor if start is None or x >= start
                           else None)


def add_short_profile(dst, doc, depth, dose_of):
    """A profile of 6 MeV, A06, open at depth (cm), edge distances 0 to 5 cm
    by 0.25, dose_of(x) percent; added to doc (written by the caller)."""
    name = "profiles/e06_a06_open_d%.2f.csv" % depth
    doc["profiles"].append({"energy_mev": 6, "applicator": "A06", "insert": "open",
                            "depth_cm": depth, "direction": "crossplane", "file": name,
                            "uncertainty": {"relative": 0.02, "floor_percent": 0.002}})
    with open(os.path.join(dst, name), "w", newline="") as f:
        w = csv.writer(f)
        w.writerow(["edge_distance_cm", "dose_percent"])
        for i in range(21):
            w.writerow([0.25 * i, repr(round(dose_of(0.25 * i), 6))])


class ProfilesInAnotherUnit(unittest.TestCase):
    """A profile is in percent of the central-axis maximum. At a depth no
    deeper than the maximum's, an electron beam's axis dose is 70 % of the
    maximum and more, and its dose at the field edge about half that (common
    practice); the demo set's profiles read 39 % and more at the edge. The
    same set with one profile as a fraction (every dose / 100) is refused
    naming the file, where the model read a hundred times low (found by an
    independent review)."""

    def refuse_fraction(self, name, through, start=None, fragment="a fraction, another unit or "
                        "another reference dose"):
        with tempdir() as d:
            dst, ms, _ = demo_set_copy(d)
            head = scale_profile(os.path.join(dst, "profiles", name), 0.01, start)
            self.assertEqual(head[0], "off_axis_cm" if through else "edge_distance_cm")
            rc, out, err = run("fit", ms, "-q", "-o", os.path.join(d, "m.yaml"))
        self.assertEqual(rc, 3, err)
        self.assertEqual(len(err.strip().splitlines()), 1, err)
        self.assertIn(name, err)
        self.assertIn(fragment, err)

    def test_an_edge_distance_profile_as_a_fraction(self):
        self.refuse_fraction("e06_a06_open_d0.00.csv", False)

    def test_a_through_field_profile_as_a_fraction(self):
        self.refuse_fraction("e09_a10_open_d1.00_inplane_through.csv", True)

    def test_a_profile_from_half_a_centimetre_as_a_fraction(self):
        """Neither the axis nor the edge in it: far from the field it reads a
        hundredth of the other profiles of 9 MeV, A10, open at depths no deeper
        than the maximum (found by an independent review of the first rule)."""
        self.refuse_fraction("e09_a10_open_d1.00.csv", False, start=0.5,
                             fragment="another unit or another reference dose")

    def test_a_profile_deeper_than_the_maximum_as_a_fraction(self):
        """6 MeV, A06, open at 2 cm, deeper than the maximum (1.36 cm), where
        neither the axis nor the edge rule applies: far from the field it
        reads a hundredth of the other depths' profiles and is refused (found
        by an independent review: every deep organ read 100 times low)."""
        self.refuse_fraction("e06_a06_open_d2.00.csv", False,
                             fragment="another unit or another reference dose")

    def test_two_profiles_alone_are_compared(self):
        """An insert measured at two depths only, one of them a hundredth of
        the other far out: with no third to take a median from, the two are
        compared and refused, saying either may be the one (found by an
        independent review: a pair was never compared)."""
        with tempdir() as d:
            dst, ms, doc = demo_set_copy(d)
            # keep two of the 6 MeV A06 C4 insert's profiles: 0 and 2 cm
            doc["profiles"] = [p for p in doc["profiles"]
                               if not (p["energy_mev"] == 6 and p["applicator"] == "A06" and
                                       p["insert"] == "C4" and p["depth_cm"] not in (0, 2))]
            with open(ms, "w") as f:
                yaml.safe_dump(doc, f)
            scale_profile(os.path.join(dst, "profiles", "e06_a06_c4_d2.00.csv"), 0.01)
            rc, out, err = run("fit", ms, "-q", "-o", os.path.join(d, "m.yaml"))
        self.assertEqual(rc, 3, err)
        self.assertIn("either may be the one", err)

    def test_deep_short_profiles_do_not_outvote_the_others(self):
        """6 MeV, A06, open measured at 0.5, 1 and 2 cm, and at 3, 3.5 and 4
        cm to 5 cm only (photons alone beyond the range, 0.62 % at the edge
        falling to 0.12 %). The three short deep profiles, each held to the
        wider tolerance against the 2 cm profile, are accepted; with the 2 cm
        profile ten times low they must not outvote its pairs with the
        shallow profiles (found by an independent review: it was accepted,
        every organ near 2 cm deep ten times low)."""
        for scale, rc_want in ((1.0, 0), (0.1, 3)):
            with tempdir() as d:
                dst, ms, doc = demo_set_copy(d)
                doc["profiles"] = [p for p in doc["profiles"]
                                   if not (p["energy_mev"] == 6 and p["applicator"] == "A06" and
                                           p["insert"] == "open" and
                                           p["depth_cm"] not in (0.5, 1.0, 2.0))]
                for depth in (3.0, 3.5, 4.0):
                    add_short_profile(dst, doc, depth, lambda x, k=1 - 0.05 * (depth - 3): k * (
                        0.16 * math.exp(-x / 15) + 0.46 * math.exp(-x / 1.1)))
                with open(ms, "w") as f:
                    yaml.safe_dump(doc, f)
                scale_profile(os.path.join(dst, "profiles", "e06_a06_open_d2.00.csv"), scale)
                rc, out, err = run("fit", ms, "-q", "-o", os.path.join(d, "m.yaml"))
            self.assertEqual(rc, rc_want, err)
            if rc_want:
                self.assertIn("e06_a06_open_d2.00.csv", err)
                self.assertIn("another unit or another reference dose", err)

    def test_a_tail_scanned_alone_as_a_fraction(self):
        """A profile whose points all lie 12 cm and more from the edge, as a
        fraction: it shares no distance with the others up to 10 cm, so it
        is compared where both reach, at its own first point, and refused
        (found by an independent review: such a tail was compared with
        nothing)."""
        self.refuse_fraction("e06_a06_open_d0.00.csv", False, start=12,
                             fragment="another unit or another reference dose")

    def test_a_short_profile_beyond_the_range_is_accepted(self):
        """6 MeV, A06, open at 4 cm, beyond the electrons' practical range
        (about 3 cm at 6 MeV, from memory), scanned to 5 cm only: photons
        alone, 0.62 % at the edge falling to 0.12 %, a few times below the
        shallower profiles there (0.75 % at 2 cm). A plausible profile in
        percent is taken (the wider tolerance of a deep pair compared near
        the field, models/README.md), and one in fractions still refused.
        One whose level stops falling (0.125 % flat beyond 3 cm) sends the
        tail's length to infinity: refused naming the profile, not when
        the model file is read back (found writing this test)."""
        for tail, scale, rc_want in ((15.0, 1.0, 0), (15.0, 0.01, 3), (None, 1.0, 3),
                                     (15.0, 1.0, "d0.50")):
            with tempdir() as d:
                dst, ms, doc = demo_set_copy(d)
                add_short_profile(dst, doc, 4.0, lambda x: scale * (
                    0.16 * math.exp(-x / tail) + 0.46 * math.exp(-x / 1.1) if tail
                    else 0.125 + 0.495 * math.exp(-x / 1.1)))
                with open(ms, "w") as f:
                    yaml.safe_dump(doc, f)
                if rc_want == "d0.50":
                    # beside it, the profile at 0.5 cm ten times low from 1 cm:
                    # the deep pair's wider tolerance does not widen the
                    # others' (found by an independent review: it was accepted)
                    scale_profile(os.path.join(dst, "profiles", "e06_a06_open_d0.50.csv"), 0.1,
                                  start=1.0)
                rc, out, err = run("fit", ms, "-q", "-o", os.path.join(d, "m.yaml"))
            if rc_want == "d0.50":
                self.assertEqual(rc, 3, err)
                self.assertIn("e06_a06_open_d0.50.csv", err)
                self.assertIn("reads 0.1", err)
                continue
            self.assertEqual(rc, rc_want, err)
            if rc_want:
                self.assertEqual(len(err.strip().splitlines()), 1, err)
                self.assertIn("e06_a06_open_d4.00.csv", err)
                self.assertIn("another unit or another reference dose" if tail else
                              "scan farther out", err)


class OneSideHotter(unittest.TestCase):
    """The demo set's through-field profile at 9 MeV, A10, 1 cm, inplane, with
    its positive side beyond 7 cm made 1.5 times hotter: an organ may lie on
    either side, so where the two sides differ by more than three standard
    deviations of a difference the hotter is kept, with a warning naming the
    profile; the mean of the two would read 17 % low on the hot side, with no
    mark (found by an independent review). The two sides are read at the same
    distances from their edges only out to 5.2 cm; farther out their points
    interleave, and each point is compared with the other side read between
    its neighbours there, or beyond that side's scan its last two points
    carried on (before, the fit went through both sides out there, low on
    the hot one). The reference is the data as made: the points kept
    are 1.5 times the original side's, and so is the fit beyond 2 cm."""

    def fit_set(self, d, hot, keep=lambda x: True, model=False):
        dst = os.path.join(d, "set%d" % hot)
        shutil.copytree(os.path.join(SOURCE_ROOT, "examples", "commissioning", "demo-e1"), dst)
        rewrite_profile(os.path.join(dst, "profiles", "e09_a10_open_d1.00_inplane_through.csv"),
                        lambda x, v: (v * 1.5 if hot and x > 7 else v) if keep(x) else None)
        out = os.path.join(d, "m%d.yaml" % hot)
        rc, _, err = run("fit", os.path.join(dst, "measurements.yaml"), "-q", "-o", out)
        self.assertEqual(rc, 0, err)
        if model:
            return out
        for p in load(out)["profiles"]:
            if (p["energy_mev"], p["applicator"], p["depth_cm"], p["direction"]) == \
                    (9, "A10", 1.0, "inplane"):
                return p["points"], p["fit"], err
        raise AssertionError("profile not in the model")

    @staticmethod
    def loglin(ds, vs, x):
        """The base profile between its points (log-linear: an exponential fall-off)."""
        for k in range(1, len(ds)):
            if ds[k - 1] <= x <= ds[k]:
                t = (x - ds[k - 1]) / (ds[k] - ds[k - 1])
                return math.exp(math.log(vs[k - 1]) + t * (math.log(vs[k]) - math.log(vs[k - 1])))
        raise AssertionError("%g outside the base points" % x)

    @staticmethod
    def fit_value(fit, x):
        """The model's profile form (models/README.md): two exponentials and,
        when peaked, a Gaussian."""
        q = fit["parameters"]
        v = q["a_percent"] * math.exp(-x / q["lambda1_cm"]) + \
            q["c_percent"] * math.exp(-x / q["lambda2_cm"])
        if fit["form"] == "peaked":
            v += q["b_percent"] * math.exp(-0.5 * ((x - q["mu_cm"]) / q["sigma_cm"]) ** 2)
        return v

    def test_the_hotter_side_is_kept(self):
        with tempdir() as d:
            base, base_fit, _ = self.fit_set(d, False)
            hot, hot_fit, err = self.fit_set(d, True)
        self.assertIn("e09_a10_open_d1.00_inplane_through.csv", err)
        self.assertIn("the hotter side is kept", err)
        # the hot side's scan reaches 21.2 cm from its edge (26.25 cm off
        # axis); the cold side's last point, 21.95 cm, is compared with the
        # hot side's last two carried on, and left out
        self.assertLess(max(hot["distance_cm"]), 21.5)
        n = far = 0
        for dist, h in zip(hot["distance_cm"], hot["dose_percent"]):
            if 2.1 <= dist <= 21.0:
                ratio = h / self.loglin(base["distance_cm"], base["dose_percent"], dist)
                self.assertGreater(ratio, 1.35, dist)
                self.assertLess(ratio, 1.65, dist)
                n += 1
                far += dist > 5.2
        self.assertGreaterEqual(n, 20)
        self.assertGreaterEqual(far, 10)
        # the fit follows the hot side out to the farthest point: within 5 %
        # of 1.5 times the base fit (before the cold side's last point was
        # compared, 11 % low at 21 cm)
        for x in (3.0, 5.0, 8.0, 11.0, 14.0, 16.0, 18.0, 20.0, 21.0):
            ratio = self.fit_value(hot_fit, x) / self.fit_value(base_fit, x)
            self.assertGreater(ratio, 1.425, x)
            self.assertLess(ratio, 1.575, x)
        self.assertFalse(base_fit["poor"])


    def test_a_colder_side_scanned_farther_does_not_speak_for_the_hotter(self):
        """The same hot side, its scan cut at 12 cm off axis (about 7 cm from
        its edge), the cold side read on to 21 cm: beyond the hot side's
        scan nothing says what it reads, and the cold side's points there
        would bend the fit toward the cold side (25 % low at 10 cm before).
        They are left out, so the profile ends where the hot side ends and
        the model holds its farthest level beyond [extrapolated]: at least
        1.5 times the base model there (the data as made)."""
        with tempdir() as d:
            base = self.fit_set(d, False, model=True)
            hot = self.fit_set(d, True, keep=lambda x: x < 12, model=True)
            with tempdir() as d2:
                _, _, err = self.fit_set(d2, True, keep=lambda x: x < 12)
            # said apart from the compared points: the cold (negative) side
            # is cut short where the hot side was not scanned
            self.assertIn("the negative side reads colder where both sides were read", err)
            self.assertIn("the model holds its farthest level beyond [extrapolated]", err)

            def ev(m, x):
                rc, out, err = run("model", "eval", m, "-e", "9", "-a", "A10", "-d", "1",
                                   "-x", str(x), "--angle", "90", "-f", "json")
                self.assertEqual(rc, 0, err)
                return json.loads(out)
            for x in (8.0, 10.0, 14.0, 20.0):
                b, h = ev(base, x), ev(hot, x)
                self.assertGreaterEqual(h["dose_percent"], 1.5 * 0.97 * b["dose_percent"], x)
                self.assertIn("extrapolated", h["flags"], x)


class SetWarnings(unittest.TestCase):
    """Two slips a measurement set can hold that no single profile shows
    (found by an independent review): one file named by two entries (a copy
    and paste that puts one depth's data at another), and a transfer
    uncertainty of 0 (the water tank standing for the patient exactly,
    against the published spread of out-of-field estimates, Med Phys 34:1193
    (2007)). Each is a warning naming the set; the demo set raises neither."""

    def fit_edited(self, edit):
        with tempdir() as d:
            dst = os.path.join(d, "set")
            shutil.copytree(os.path.join(SOURCE_ROOT, "examples", "commissioning", "demo-e1"),
                            dst)
            path = os.path.join(dst, "measurements.yaml")
            with open(path) as f:
                text = f.read()
            with open(path, "w") as f:
                f.write(edit(text))
            rc, out, err = run("fit", path, "-o", os.path.join(d, "m.yaml"))
        self.assertEqual(rc, 0, err)
        return err

    def test_the_demo_set_raises_neither(self):
        err = self.fit_edited(lambda t: t)
        self.assertNotIn("same content", err)
        self.assertNotIn("transfer_uncertainty band", err)

    def test_one_file_under_two_entries(self):
        err = self.fit_edited(lambda t: t.replace("file: profiles/e06_a06_open_d0.50.csv",
                                                  "file: profiles/e06_a06_open_d0.00.csv"))
        self.assertIn("read files with the same content", err)
        self.assertIn("e06_a06_open_d0.00.csv", err)

    def test_a_transfer_uncertainty_of_zero(self):
        err = self.fit_edited(lambda t: t.replace(
            "  invented: true\n", "  invented: true\n  transfer_uncertainty:\n"
            "    source: a test\n    mark: measured\n    bands:\n      - {relative: 0}\n", 1))
        self.assertIn("transfer_uncertainty band 1 is 0", err)


class DirectionsStandInPoorFits(unittest.TestCase):
    """Evaluation rules of models/README.md worked by hand: a crossplane
    profile measured to 30 cm and a through-field inplane profile to 20 cm at
    one depth; a poor fit; the stand-in for an uncommissioned cutout beside a
    commissioned insert; a transfer uncertainty given in the file."""
    X = (40.0, 1.0, 2.0, 10.0)
    Y = (30.0, 1.5, 1.0, 8.0)
    C6 = (50.0, 1.2, 2.5, 10.0)
    TRANSFER = {"source": "hand-made", "mark": "common practice",
                "bands": [{"below_cm": 10, "relative": 0.1}, {"relative": 0.5}]}

    @classmethod
    def setUpClass(cls):
        cls.tmp = tempdir()
        cls.path = os.path.join(cls.tmp.name, "dirs.yaml")
        poor = smooth_profile(0.0, *cls.C6, 1e-4, insert="C6")
        poor["fit"]["poor"] = True
        poor["fit"]["max_residual_relative"] = 0.1
        write_model(cls.path, [smooth_profile(0.0, *cls.X, 1e-4, last=30),
                               smooth_profile(0.0, *cls.Y, 1e-4, direction="inplane"),
                               poor],
                    inserts=["C6", "C9"], transfer=cls.TRANSFER, factors={"C6": 0.9})

    @classmethod
    def tearDownClass(cls):
        cls.tmp.cleanup()

    value = HandMadeModel.value

    def ev(self, *args):
        return run_json("model", "eval", self.path, "--format", "json", "-e", "9", "-a", "A10",
                        "-d", "0", *args)

    def test_along_x_uses_the_crossplane_profile_and_its_range(self):
        js = self.ev("-x", "25", "--angle", "0")
        self.assertAlmostEqual(js["dose_percent"], self.value(self.X, 25), delta=1e-9)
        self.assertNotIn("extrapolated", js["flags"])
        self.assertEqual(js["uncertainty_extrapolation_percent"], 0)

    def test_along_y_uses_the_inplane_profile_and_its_range(self):
        js = self.ev("-x", "25", "--angle", "90")
        self.assertIn("extrapolated", js["flags"])
        floor = max(sum(self.value(self.Y, x) for x in (18, 19, 20)) / 3,
                    self.value(self.Y, 20))
        self.assertAlmostEqual(js["dose_percent"], max(floor, self.value(self.Y, 25)),
                               delta=1e-9)

    def test_between_directions_log_linear_in_angle(self):
        vx, vy = self.value(self.X, 6), self.value(self.Y, 6)
        w = 30 / 90
        want = math.exp((1 - w) * math.log(vx) + w * math.log(vy))
        js = self.ev("-x", "6", "--angle", "30")
        self.assertAlmostEqual(js["dose_percent"], want, delta=1e-9 * want)
        self.assertAlmostEqual(js["uncertainty_interpolation_percent"],
                               w * (1 - w) * abs(vy - vx), delta=1e-9)

    def test_unknown_direction_takes_the_highest(self):
        js = self.ev("-x", "6")
        self.assertAlmostEqual(js["dose_percent"],
                               max(self.value(self.X, 6), self.value(self.Y, 6)), delta=1e-9)

    def test_transfer_bands_from_the_file(self):
        for x, rel in ((5, 0.1), (12, 0.5)):
            js = self.ev("-x", str(x), "--angle", "0")
            self.assertAlmostEqual(js["uncertainty_transfer_percent"], rel * js["dose_percent"],
                                   delta=1e-9)

    def test_poor_fit_widens_and_marks(self):
        js = self.ev("-x", "4", "-i", "C6")
        v = self.value(self.C6, 4)
        self.assertIn("poor_fit", js["flags"])
        a, l1, c, l2 = self.C6
        g = [math.exp(-4 / l1), a * math.exp(-4 / l1) * 4 / l1 ** 2, math.exp(-4 / l2),
             c * math.exp(-4 / l2) * 4 / l2 ** 2]
        ufit = math.sqrt(sum(x * x * 1e-4 for x in g))
        self.assertAlmostEqual(js["uncertainty_fit_percent"], math.hypot(ufit, 0.1 * v),
                               delta=1e-9)

    def test_standin_takes_the_largest_candidate(self):
        # C9 has no profiles: open from the cutout's edge (4 cm), open from the
        # applicator's edge (2 cm), C6 from the cutout's edge x its factor 0.9
        js = self.ev("-x", "4", "--applicator-distance", "2", "--angle", "0", "-i", "C9")
        cands = [self.value(self.X, 4), self.value(self.X, 2), 0.9 * self.value(self.C6, 4)]
        self.assertAlmostEqual(js["dose_percent"], max(cands), delta=1e-9)
        self.assertAlmostEqual(js["uncertainty_standin_percent"],
                               (max(cands) - min(cands)) / 2, delta=1e-9)
        self.assertIn("standin_for_uncommissioned_cutout", js["flags"])
        # without the applicator's edge, C6 (x 0.9) still bounds it from below
        js = self.ev("-x", "4", "--angle", "0", "-i", "C9")
        self.assertGreaterEqual(js["dose_percent"], 0.9 * self.value(self.C6, 4) - 1e-9)


def poor_by_scipy(fit):
    """The documented poor-fit rule (models/README.md), by scipy: chi-square
    beyond its 0.5 % upper quantile, or the largest residual beyond the limit
    that n normal residuals pass together with probability 0.995 (Sidak)."""
    n, dof = fit["n"], fit["dof"]
    chi2_lim = stats.chi2.isf(0.005, dof)
    q = -math.expm1(math.log1p(-0.005) / n) / 2
    return fit["chi2"] > chi2_lim or fit["max_residual_sigma"] > stats.norm.isf(q)


class PoorFitFalseAlarms(unittest.TestCase):
    N = 1000
    DESIGN_RATE = 0.01  # the two tests at 0.5 % each, less their overlap

    def test_synthetic_good_profiles(self):
        rng = np.random.default_rng(20261202)
        d = np.round(np.arange(0.0, 30.01, 0.6), 4)
        truth = smooth(d, 30.0, 1.2, 1.5, 12.0)
        rel, floor = 0.03, 0.002
        sigma = np.sqrt((rel * truth) ** 2 + floor ** 2)
        with tempdir() as tmp:
            os.mkdir(os.path.join(tmp, "p"))
            profiles = []
            for i in range(self.N):
                y = truth + rng.normal(0.0, sigma)
                name = "p/s%04d.csv" % i
                with open(os.path.join(tmp, name), "w") as f:
                    f.write("edge_distance_cm,dose_percent\n")
                    for a, b in zip(d, y):
                        f.write("%.4f,%.8g\n" % (a, b))
                profiles.append({"energy_mev": 9, "applicator": "A10", "insert": "open",
                                 "depth_cm": round(i * 0.01, 2), "direction": "crossplane",
                                 "file": name,
                                 "uncertainty": {"relative": rel, "floor_percent": floor}})
            doc = {"format": "strayline-measurements", "format_version": 1,
                   "notice": "synthetic test profiles",
                   "machine": {"name": "SYNTH", "nominal_ssd_cm": 100, "sad_cm": 100},
                   "measured": {"date": "2026-12-02", "by": "test", "detector": "none"},
                   "reference": "percent of the open field's central-axis maximum",
                   "applicators": [{"id": "A10", "shape": "square", "field_x_cm": 10,
                                    "field_y_cm": 10}],
                   "outputs": [{"energy_mev": 9, "applicator": "A10", "dose_per_mu_cgy": 1.0,
                                "dmax_cm": 2.0, "effective_ssd_cm": 95.0}],
                   "profiles": profiles}
            meas = os.path.join(tmp, "m.yaml")
            with open(meas, "w") as f:
                yaml.safe_dump(doc, f, sort_keys=False)
            out = os.path.join(tmp, "model.yaml")
            rc, _, err = run("fit", meas, "-o", out)
            self.assertEqual(rc, 0, err)
            m = load(out)
        fits = [p["fit"] for p in m["profiles"]]
        self.assertEqual(len(fits), self.N)
        for f in fits:
            self.assertEqual(f["poor"], poor_by_scipy(f))
        poor = sum(f["poor"] for f in fits)
        lo, hi = stats.binom.interval(0.999, self.N, self.DESIGN_RATE)
        self.assertTrue(lo <= poor <= hi, "%d of %d good profiles called poor (band %d-%d)"
                        % (poor, self.N, lo, hi))

    def test_shipped_model_verdicts_follow_the_rule(self):
        for p in load(MODEL)["profiles"]:
            self.assertEqual(p["fit"]["poor"], poor_by_scipy(p["fit"]), p["data_file"])


class ModelShow(unittest.TestCase):
    def test_show_lists_every_combination(self):
        js = run_json("model", "show", MODEL, "--format", "json")
        combos = {(c["energy_mev"], c["applicator"], c["insert"]) for c in js["commissioned"]}
        self.assertIn((9, "A10", "open"), combos)
        self.assertIn((12, "A06", "C4"), combos)
        self.assertEqual(len(combos), 5 * 5 + 2 * 5)
        self.assertTrue(js["machine"]["invented"])
        rc, out, err = run("model", "show", MODEL)
        self.assertEqual(rc, 0)
        self.assertIn("INVENTED DEMO DATA", out)


if __name__ == "__main__":
    unittest.main()
