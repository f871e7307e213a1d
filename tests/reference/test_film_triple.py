"""The triple-channel film dose (`strayline film profile --dose-channels triple`)
against outside references. The scans are synthetic (numpy + tifffile,
examples/generator/film_synth.py): the rational scanner response of Lewis et al.,
Med Phys 39:6339 (2012) per channel, and a film whose thickness varies smoothly,
tau(x, y) = 1 + 0.04 sin(...), applied to every channel's total optical density
OD_k = log10(65535 / PV_k), the unexposed film's own included, as the triple-channel
method models it (from memory: Micke, Lewis and Yu, Med Phys 38:2523 (2011)).
Checks:

- the single-channel profile is off by the thickness pattern (numpy truth: far more
  than its stated uncertainty in the tail); the triple-channel profile agrees with
  the truth within its stated uncertainty (the points' z-scores), out to the far
  tail (below 1 % of the axis dose);
- each cell's thickness factor agrees with the true pattern within its stated
  uncertainty;
- each cell's factor and dose agree with scipy.optimize.minimize_scalar (bounded)
  minimising the same weighted spread of the three channels' doses, from the same
  channel means (cells/*.csv) through the curve file's forms, and the dose's
  uncertainty with the weighted least-squares covariance (J^T W J)^-1 computed
  here with numpy;
- films.yaml's factor summary (median and range) recomputed with numpy;
- a factor beyond the searched range: the cells on the bound dropped and counted;
- films of uniform thickness (test_film's campaign, two exposures merged): the
  triple-channel profiles within their stated uncertainty of the numpy truth, the
  edges within 0.5 mm, the factor's median within 0.003 of 1;
- a grey scan and a curve without the three channels refused with one line naming
  the file.
"""
import math
import os
import unittest

import numpy as np
import tifffile
import yaml
from scipy.optimize import minimize_scalar

from common import run, tempdir

import film_synth
import make_films
from test_film import Campaign, load

LN10 = math.log(10)
AXIS = 97.0  # cGy on the axis of the synthetic film (100 MU, 0.97 at 1 cm; invented)
LO, HI = 0.85, 1.15  # the factor's search range (models/README.md, film)


def thickness(X, Y):
    """The film's invented thickness pattern relative to the calibration's."""
    return 1.0 + 0.04 * np.sin(2 * np.pi * (X + 0.5 * Y) / 6.0 + 0.7)


def curve_dose(ch, x, sd, pv0, pv0_sem, want_sigma=True):
    """The curve's dose of a netOD and its standard uncertainty, as models/README.md
    (film) states it: sqrt(g^T C g + D'^2 (s^2 + scatter^2 + (sem0/PV0/ln 10)^2))."""
    if x > ch["max_netod"]:
        return math.nan, math.nan, math.nan
    f = [f for f in ch["forms"] if f["chosen"]][0]
    t = f["parameters"]
    if f["form"] == "rational":
        X = 10.0 ** (-x)
        u = X - t[0]
        if u <= 0:
            return math.nan, math.nan, math.nan
        d = t[2] + t[1] / u
        g = np.array([t[1] / u ** 2, 1 / u, 1.0])
        slope = t[1] * X * LN10 / u ** 2
    else:
        ax = abs(x)
        p = math.copysign(ax ** t[2], x) if ax > 0 else 0.0
        d = t[0] * x + t[1] * p
        g = np.array([x, p, t[1] * p * math.log(ax) if ax > 0 else 0.0])
        slope = t[0] + t[1] * t[2] * ax ** (t[2] - 1)
    if not want_sigma:
        return d, math.nan, slope
    C = np.array(f["covariance"]).reshape(3, 3)
    vx = sd ** 2 + ch["netod_scatter"] ** 2 + (pv0_sem / pv0 / LN10) ** 2
    return d, math.sqrt(max(float(g @ C @ g), 0.0) + slope ** 2 * vx), slope


class TripleChannel(unittest.TestCase):
    @classmethod
    def setUpClass(cls):
        cls.tmpctx = tempdir()
        cls.c = Campaign(cls.tmpctx.name)
        cls.curve = load(cls.c.curve)
        cls.ch = {ch["channel"]: ch for ch in cls.curve["channels"]}
        base = load(cls.c.films)
        scan = os.path.join(cls.c.dir, "scans", "thick.tif")
        film_synth.measurement_scan(scan, AXIS, make_films.FIELD_CM, 16.0, 8.0, dpi=50, seed=5,
                                    control_cm=make_films.CONTROL_CM, thickness=thickness)
        doc = dict(base)
        f = dict(doc["films"][0])
        f.update({"id": "thick", "scan": "scans/thick.tif", "monitor_units": 100,
                  "cax_reference_cgy": 100.0, "directions": ["crossplane"]})
        doc["films"] = [f]
        cls.films = os.path.join(cls.c.dir, "thick.yaml")
        with open(cls.films, "w") as fh:
            yaml.safe_dump(doc, fh)
        rc, cls.out1, err, cls.single = cls.c.profile(cls.films, "single")
        if rc != 0:
            raise AssertionError(err)
        rc, cls.out3, err, cls.triple = cls.c.profile(cls.films, "triple", "--dose-channels",
                                                      "triple")
        if rc != 0:
            raise AssertionError(err)
        cls.res = load(os.path.join(cls.triple, "films.yaml"))
        cls.edge = film_synth.truth_edge(AXIS / 100, make_films.FIELD_CM)

    @classmethod
    def tearDownClass(cls):
        cls.tmpctx.cleanup()

    def points(self, d):
        p = load(os.path.join(d, "films.yaml"))["profiles"][0]
        pts = np.genfromtxt(os.path.join(d, p["file"].replace("profiles/", "points/")),
                            delimiter=",", skip_header=1)
        x, v, s = pts[:, 0], pts[:, 1], pts[:, 2]
        t = film_synth.truth_percent(x, AXIS / 100, make_films.FIELD_CM)
        return x, v, s, t

    def cells(self):
        return np.genfromtxt(os.path.join(self.triple, "cells", "thick.csv"), delimiter=",",
                             names=True, dtype=None, encoding="utf-8")

    def test_single_channel_is_off_by_the_thickness(self):
        """The single (red) channel reads the thickness as dose: in the tail (beyond
        0.6 cm outside the 50 % edge) its points lie far outside their stated
        uncertainty (numpy truth)."""
        x, v, s, t = self.points(self.single)
        tail = np.abs(x) > self.edge + 0.6
        z = (v - t)[tail] / s[tail]
        self.assertGreater(float(np.sqrt(np.mean(z ** 2))), 5.0)
        print("# single channel, tail: %d points, rms z %.1f, median |error| %.3f %% of max"
              % (tail.sum(), np.sqrt(np.mean(z ** 2)), np.median(np.abs(v - t)[tail])))

    def test_triple_channel_equals_truth_within_stated_uncertainty(self):
        """Outside the penumbra (0.6 cm from the true 50 % edge), the triple-channel
        points against the numpy truth in units of their stated uncertainty: root mean
        square between 0.5 and 1.5, none beyond 4; the far tail (below 1 % of the axis
        dose, out to 4.5 cm outside the edge) is resolved on both sides."""
        x, v, s, t = self.points(self.triple)
        keep = np.abs(np.abs(x) - self.edge) > 0.6
        z = (v - t)[keep] / s[keep]
        rms = float(np.sqrt(np.mean(z ** 2)))
        self.assertGreater(rms, 0.5)
        self.assertLess(rms, 1.5)
        self.assertLess(float(np.abs(z).max()), 4.0)
        far = t < 1.0
        self.assertGreater(int(far.sum()), 40)
        self.assertGreater(float(x.max()), self.edge + 4.5)
        self.assertLess(float(x.min()), -(self.edge + 4.5))
        print("# triple channel: %d points outside the penumbra, rms z %.2f, max |z| %.2f; "
              "%d points below 1 %%, median |error| there %.3f %% of max, median sigma %.3f"
              % (keep.sum(), rms, np.abs(z).max(), far.sum(), np.median(np.abs(v - t)[far]),
                 np.median(s[far])))

    def test_thickness_factor_is_the_pattern(self):
        """Each cell's factor against the true thickness at the cell's centre (the
        field's centre is the film's; the line runs along the image's x): within 4 of
        its stated standard uncertainties, and the stated uncertainty below 0.01."""
        c = self.cells()
        ok = c["status"] == "dose"
        self.assertGreater(int(ok.sum()), 100)
        truth = thickness(c["off_axis_cm"][ok], 0.0)
        z = (c["thickness_factor"][ok] - truth) / c["thickness_factor_sigma"][ok]
        self.assertLess(float(np.abs(z).max()), 4.0)
        self.assertLess(float(np.median(c["thickness_factor_sigma"][ok])), 0.01)

    def test_cells_against_scipy(self):
        """Per cell, scipy.optimize.minimize_scalar (bounded) on the weighted spread
        sum_k w_k (D_k(tau) - D)^2 with D_k(tau) the curve's dose of netOD_k =
        OD_k / tau - OD0_k and w_k = 1 / sigma_k^2 at tau = 1 (or where every channel
        first reads, when that is above 1): the same factor within
        1e-5, the same dose within 1e-5 relative, the same uncertainty (the weighted
        least squares' (J^T W J)^-1 scaled by max(1, chi^2)) within 1e-3 relative."""
        c = self.cells()
        f = self.res["films"][0]
        pv0 = f["unexposed_pixel_values"]
        sem0 = f["unexposed_pixel_value_sems"]
        chans = [self.ch[n] for n in ("red", "green", "blue")]
        od0 = [math.log10(65535 / p) for p in pv0]
        checked = 0
        for row in c:
            if row["status"] != "dose":
                continue
            pv = [row["pv_red"], row["pv_green"], row["pv_blue"]]
            sem = [row["pv_sem_red"], row["pv_sem_green"], row["pv_sem_blue"]]
            od = [math.log10(65535 / p) for p in pv]
            # the range where every channel reads, and the weights at max(1, its start)
            lo = max(LO, max(od[k] / (chans[k]["max_netod"] + od0[k]) for k in range(3)))
            tw = max(1.0, lo)
            w = []
            for k in range(3):
                _, sg, _ = curve_dose(chans[k], od[k] / tw - od0[k], sem[k] / pv[k] / LN10,
                                      pv0[k], sem0[k])
                w.append(1 / sg ** 2)
            w = np.array(w)

            def doses(tau):
                return np.array([curve_dose(chans[k], od[k] / tau - od0[k], 0, pv0[k], sem0[k],
                                            False)[0] for k in range(3)])

            def spread(tau):
                d = doses(tau)
                if not np.all(np.isfinite(d)):
                    return 1e300
                m = np.sum(w * d) / np.sum(w)
                return float(np.sum(w * (d - m) ** 2))

            r = minimize_scalar(spread, bounds=(lo, HI), method="bounded",
                                options={"xatol": 1e-10})
            tau = r.x
            d = doses(tau)
            mean = float(np.sum(w * d) / np.sum(w))
            a = np.array([curve_dose(chans[k], od[k] / tau - od0[k], 0, pv0[k], sem0[k],
                                     False)[2] * (-od[k] / tau ** 2) for k in range(3)])
            J = np.column_stack([a, -np.ones(3)])
            cov = np.linalg.inv(J.T @ np.diag(w) @ J) * max(1.0, spread(tau))
            self.assertAlmostEqual(row["thickness_factor"], tau, delta=1e-5)
            self.assertAlmostEqual(row["dose_cgy"], mean, delta=1e-5 * abs(mean) + 1e-6)
            self.assertAlmostEqual(row["sigma_cgy"], math.sqrt(cov[1, 1]),
                                   delta=1e-3 * math.sqrt(cov[1, 1]))
            self.assertAlmostEqual(row["thickness_factor_sigma"], math.sqrt(cov[0, 0]),
                                   delta=1e-3 * math.sqrt(cov[0, 0]))
            checked += 1
        self.assertGreater(checked, 100)

    def test_summary_in_films_yaml_and_qa_page(self):
        """films.yaml: the method, the factor's median and range over the cells with a
        dose (numpy), the cells dropped, the map's blocks; the QA page states them with
        a factor plot."""
        self.assertEqual(self.res["dose_channels"], "triple")
        self.assertEqual(self.res["thickness_factor_range"], [LO, HI])
        f = self.res["films"][0]
        c = self.cells()
        ok = c["status"] == "dose"
        tf = f["thickness_factor"]
        self.assertEqual(tf["cells"], int(ok.sum()))
        self.assertAlmostEqual(tf["median"], float(np.median(c["thickness_factor"][ok])),
                               delta=1e-9)
        self.assertAlmostEqual(tf["min"], float(c["thickness_factor"][ok].min()), delta=1e-9)
        self.assertAlmostEqual(tf["max"], float(c["thickness_factor"][ok].max()), delta=1e-9)
        self.assertEqual(f["points_thickness_factor_on_bound"],
                         int(np.sum(c["status"] == "thickness_factor_on_bound")))
        self.assertEqual(f["points_below_lowest_dose"],
                         int(np.sum(c["status"] == "below_lowest_dose")))
        # the centre's cell: the true axis dose within 3 of the cell's stated uncertainties
        centre = c[(c["off_axis_cm"] == 0) & ok]
        self.assertEqual(len(centre), 1)
        self.assertAlmostEqual(f["axis_cell_dose_cgy"], float(centre["dose_cgy"][0]), delta=1e-6)
        self.assertLess(abs(f["axis_cell_dose_cgy"] - AXIS), 3 * float(centre["sigma_cgy"][0]))
        single = load(os.path.join(self.single, "films.yaml"))
        # the map: the red channel over the factor of 0.2 cm blocks finds the field square
        # and the axis dose true (numpy truth: 97 cGy, no turn); the red channel alone reads
        # the centre's thickness (1.026) as dose and the pattern as a turn
        m = f["map_thickness_blocks"]
        self.assertAlmostEqual(m["block_cm"], 4 * 2.54 / 50)
        self.assertEqual(m["given_the_median"], 0)
        self.assertLess(abs(f["rotation_deg"]), 0.2)
        self.assertLess(abs(f["cax_dose_cgy"] - AXIS), 0.02 * AXIS)
        s0 = single["films"][0]
        self.assertGreater(abs(s0["cax_dose_cgy"] - AXIS), 0.04 * AXIS)
        self.assertGreater(abs(s0["rotation_deg"]), 0.3)
        self.assertEqual(single["dose_channels"], "single")
        self.assertEqual(single["dose_channel"], "red")
        with open(os.path.join(self.triple, f["qa_page"])) as fh:
            text = fh.read()
        self.assertIn("triple-channel", text)
        self.assertIn("film thickness factor", text)
        self.assertIn("median %.4f" % tf["median"], text)
        self.assertEqual(text.count("data:image/png;base64,"), 4)
        self.assertIn("triple-channel dose:", self.out3)

    def test_factor_beyond_the_range_is_dropped_and_counted(self):
        """A film 25 % thicker beyond 5 cm right of the centre (outside the 0.85 to 1.15
        searched): those cells' best factor lies on the bound; they are dropped, counted
        in films.yaml and the summary line, and never in the profile."""
        scan = os.path.join(self.c.dir, "scans", "step.tif")
        film_synth.measurement_scan(scan, AXIS, make_films.FIELD_CM, 16.0, 8.0, dpi=50, seed=7,
                                    control_cm=make_films.CONTROL_CM,
                                    thickness=lambda X, Y: np.where(X > 5.0, 1.25, 1.0))
        doc = load(self.films)
        doc["films"][0]["scan"] = "scans/step.tif"
        path = os.path.join(self.c.dir, "step.yaml")
        with open(path, "w") as fh:
            yaml.safe_dump(doc, fh)
        rc, out, err, d = self.c.profile(path, "step", "--dose-channels", "triple")
        self.assertEqual(rc, 0, err)
        f = load(os.path.join(d, "films.yaml"))["films"][0]
        c = np.genfromtxt(os.path.join(d, "cells", "thick.csv"), delimiter=",", names=True,
                          dtype=None, encoding="utf-8")
        bound = c["status"] == "thickness_factor_on_bound"
        # every cell wholly beyond 5 cm (half a step and a pixel of margin) is on the bound
        beyond = c["off_axis_cm"] > 5.0 + 0.05 + 0.06
        self.assertGreater(int(beyond.sum()), 20)
        self.assertTrue(np.all(bound[beyond]))
        self.assertTrue(np.all(np.abs(c["thickness_factor"][beyond] - HI) < 1e-9))
        self.assertEqual(f["points_thickness_factor_on_bound"], int(bound.sum()))
        self.assertIn("%d points dropped with the film thickness factor" % bound.sum(), out)
        x, v, s, t = self.points(d)
        self.assertLess(float(x.max()), 5.0 + 0.06)
        self.assertLess(f["thickness_factor"]["max"], HI)

    def refused(self, result, *fragments):
        rc, out, err = result
        self.assertEqual(rc, 3, err)
        self.assertEqual(out, "")
        self.assertEqual(len(err.strip().splitlines()), 1, err)
        self.assertTrue(err.startswith("strayline film: "), err)
        for f in fragments:
            self.assertIn(f, err)

    def test_grey_scan_refused(self):
        """A grey scan with --dose-channels triple: one line naming the film set and scan."""
        scan = os.path.join(self.c.dir, "scans", "grey.tif")
        film_synth.measurement_scan(scan, AXIS, make_films.FIELD_CM, 16.0, 8.0, dpi=50, seed=6,
                                    control_cm=make_films.CONTROL_CM, grey=True)
        doc = load(self.films)
        doc["films"][0]["scan"] = "scans/grey.tif"
        path = os.path.join(self.c.dir, "grey.yaml")
        with open(path, "w") as fh:
            yaml.safe_dump(doc, fh)
        self.refused(self.c.profile(path, "grey", "--dose-channels", "triple")[:3],
                     path, "grey.tif", "grey scan", "48-bit RGB")

    def test_other_bit_depth_without_control_refused(self):
        """An 8-bit scan against a 16-bit calibration, with no control piece on it: the
        factor would be read against another scan's unexposed level, so it is refused."""
        scan = os.path.join(self.c.dir, "scans", "eight.tif")
        film_synth.measurement_scan(scan, AXIS, make_films.FIELD_CM, 16.0, 8.0, dpi=50, seed=7)
        eight = (tifffile.imread(scan) >> 8).astype("uint8")   # numpy: the top 8 bits
        film_synth.write_tiff(scan, eight, dpi=50)
        doc = load(self.films)
        doc["films"] = [dict(doc["films"][0], scan="scans/eight.tif")]
        doc["films"][0].pop("unexposed_region_cm", None)
        path = os.path.join(self.c.dir, "eight.yaml")
        with open(path, "w") as fh:
            yaml.safe_dump(doc, fh)
        self.refused(self.c.profile(path, "eight", "--dose-channels", "triple")[:3],
                     path, "eight.tif", "8 bits a channel, the calibration 16",
                     "unexposed_region_cm")

    def test_one_channel_curve_refused(self):
        """A curve holding the red channel alone: one line naming the curve file and the
        missing channel."""
        doc = load(self.c.curve)
        doc["channels"] = [ch for ch in doc["channels"] if ch["channel"] == "red"]
        path = os.path.join(self.c.dir, "curve-red.yaml")
        with open(path, "w") as fh:
            yaml.safe_dump(doc, fh)
        res = run("film", "profile", self.films, "--curve", path, "--out",
                  os.path.join(self.c.dir, "red-only"), "--dose-channels", "triple")
        self.refused(res, path, "channels", "green channel has no fitted curve")

    def test_bad_option_value(self):
        rc, out, err = run("film", "profile", self.films, "--curve", self.c.curve, "--out",
                           os.path.join(self.c.dir, "x"), "--dose-channels", "quad")
        self.assertNotEqual(rc, 0)
        self.assertIn("--dose-channels is single or triple", err)


class TripleChannelUniformFilm(unittest.TestCase):
    """The test campaign of test_film (films of uniform thickness, 100 and 1000 MU at two
    depths, merged): the triple-channel profiles equal the numpy truth within their
    stated uncertainty, as the single channel's do, with the factor near 1 and
    uncertainties at most 1.6 times the single channel's."""

    @classmethod
    def setUpClass(cls):
        cls.tmpctx = tempdir()
        cls.c = Campaign(cls.tmpctx.name)
        cls.dirs = {}
        for mode in ("single", "triple"):
            rc, out, err, d = cls.c.profile(None, mode, "--dose-channels", mode)
            if rc != 0:
                raise AssertionError(err)
            cls.dirs[mode] = d

    @classmethod
    def tearDownClass(cls):
        cls.tmpctx.cleanup()

    def test_profiles_against_truth(self):
        res = {m: load(os.path.join(d, "films.yaml")) for m, d in self.dirs.items()}
        for f in res["triple"]["films"]:
            self.assertLess(abs(f["thickness_factor"]["median"] - 1), 0.003, f["id"])
            self.assertEqual(f["points_thickness_factor_on_bound"], 0)
        for p, ps in zip(res["triple"]["profiles"], res["single"]["profiles"]):
            self.assertEqual(p["file"], ps["file"])
            depth = 1.0 if "d1.00" in p["file"] else 2.0
            frac = make_films.DEPTHS[depth]
            e = film_synth.truth_edge(frac, make_films.FIELD_CM)
            self.assertLess(abs(p["edge_right_cm"] - e), 0.05, p)
            self.assertLess(abs(p["edge_left_cm"] + e), 0.05, p)
            pts = np.genfromtxt(os.path.join(self.dirs["triple"], "points",
                                             os.path.basename(p["file"])),
                                delimiter=",", skip_header=1)
            x, v, sig = pts[:, 0], pts[:, 1], pts[:, 2]
            t = film_synth.truth_percent(x, frac, make_films.FIELD_CM)
            keep = np.abs(np.abs(x) - e) > 0.6
            z = (v - t)[keep] / sig[keep]
            rms = float(np.sqrt(np.mean(z ** 2)))
            self.assertGreater(rms, 0.5, p["file"])
            self.assertLess(rms, 1.5, p["file"])
            self.assertLess(float(np.abs(z).max()), 4.0, p["file"])
            self.assertGreater(int(keep.sum()), 100)
            self.assertLess(abs(p["overlap_ratio"] - 1), 3 * p["overlap_ratio_sem"])
            ratio = p["statistical_floor_percent"] / ps["statistical_floor_percent"]
            self.assertLess(ratio, 1.6)
            print("# %s: rms z %.2f; floor %.4f %% (single %.4f %%), relative %.4f (single %.4f)"
                  % (p["file"], rms, p["statistical_floor_percent"],
                     ps["statistical_floor_percent"], p["statistical_relative_uncertainty"],
                     ps["statistical_relative_uncertainty"]))


if __name__ == "__main__":
    unittest.main()
