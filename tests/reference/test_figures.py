"""The figures of the HTML reports (drawn by cairo, see src/report/figure.h),
checked from outside:

- every <svg> of the estimate reports of the three demo cases and of the fit
  report of the demo measurements parses as XML (Python's xml.etree), its
  ids are unique in the page and every reference (#id) resolves inside the
  same figure (SVG 1.1, section 5.3: IRI references);
- every path's data follow the SVG path grammar (SVG 1.1, section 8.3: a
  command letter and whole coordinate pairs; a path cut mid-way leaves half
  a pair or a lone number) and every filled path has its subpaths closed:
  a fill is a closed shape by intent, an open path is a stroked line
  (fill:none);
- no figure's data were cut: the counts each figure records (data-counts)
  match the paths drawn (a band of 2 N vertices closed around a curve of N)
  and the data in the JSON output and the model file (each organ drawn or
  pointed at by an arrow, every organ far outside the picture an arrow, each
  level of the organ a line, the dose-volume histogram reaching the organ's
  maximum dose and its whole volume, every measured point of every profile
  a dot);
- the patient directions on the beam's-eye view's edges agree with the beam
  geometry read from the plan with pydicom and taken through the IEC 61217
  chain here with numpy (patient -> patient support -> fixed -> gantry ->
  beam limiting device; the patient-position mappings of DICOM PS3.3
  C.8.8.12.1.12 / IEC 61217, as tests/unit/test_geometry.c states them).
"""
import json
import math
import os
import re
import unittest
import xml.etree.ElementTree as ET

import numpy as np
import pydicom
import yaml

from common import SOURCE_ROOT, run, tempdir

MODEL = os.path.join(SOURCE_ROOT, "models", "demo-e1.yaml")
MEAS = os.path.join(SOURCE_ROOT, "examples", "commissioning", "demo-e1", "measurements.yaml")
CASES = {
    "face-lens": ["--prescription-isodose", "90"],
    "chest-fetus": ["--prescription-isodose", "90", "--gestational-age", "12"],
    "neck-device": ["--prescription-isodose", "90", "--pacing-dependent"],
}
SVG_NS = "{http://www.w3.org/2000/svg}"
XLINK_HREF = "{http://www.w3.org/1999/xlink}href"

# numbers each path command takes (SVG 1.1, 8.3: absolute and relative)
ARGS = {"M": 2, "L": 2, "H": 1, "V": 1, "C": 6, "S": 4, "Q": 4, "T": 2, "A": 7, "Z": 0}
TOKEN = re.compile(r"([MLHVCSQTAZmlhvcsqtaz])|([-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?)|(\S)")


def parse_path(d):
    """The subpaths of path data: lists of (command, numbers); raises on a
    grammar error (a stray character, a command with a partial pair)."""
    subpaths, cur, cmd, nums = [], None, None, []

    def flush():
        nonlocal nums
        if cmd is None:
            if nums:
                raise ValueError("numbers before a command")
            return
        n = ARGS[cmd.upper()]
        if n == 0:
            if nums:
                raise ValueError("numbers after Z")
            cur.append((cmd.upper(), []))
        else:
            if not nums or len(nums) % n:
                raise ValueError("%s with %d numbers" % (cmd, len(nums)))
            for i in range(0, len(nums), n):
                cur.append((cmd.upper(), nums[i:i + n]))
        nums = []

    for m in TOKEN.finditer(d):
        c, num, bad = m.groups()
        if bad:
            raise ValueError("stray %r" % bad)
        if num is not None:
            nums.append(float(num))
            continue
        flush()
        cmd = c
        if c in "Mm":
            cur = []
            subpaths.append(cur)
        elif cur is None:
            raise ValueError("path does not start with M")
    flush()
    return subpaths


def vertex_count(subpaths):
    return sum(1 for sp in subpaths for c, _ in sp if c in "ML")


def style_of(el):
    s = {}
    for part in (el.get("style") or "").split(";"):
        if ":" in part:
            k, v = part.split(":", 1)
            s[k.strip()] = v.strip()
    return s


def counts_of(svg):
    out = {}
    for item in (svg.get("data-counts") or "").split():
        k, v = item.split("=", 1)
        out[k] = v
    return out


def svgs_of(page):
    return re.findall(r"<svg\b.*?</svg>", page, re.S)


def letters(v, threshold=0.25):
    """DICOM direction letters of a patient-space vector (LPS), weightiest
    first, components of a quarter or more (the first always)."""
    pos, neg = "LPH", "RAF"
    order = sorted(range(3), key=lambda i: -abs(v[i]))
    out = ""
    for k, i in enumerate(order):
        if k == 0 or abs(v[i]) >= threshold:
            out += pos[i] if v[i] > 0 else neg[i]
    return out


# rows: IEC patient support X, Y, Z in DICOM patient terms (LPS)
POSITION = {
    "HFS": [[1, 0, 0], [0, 0, 1], [0, -1, 0]],
    "HFP": [[-1, 0, 0], [0, 0, 1], [0, 1, 0]],
    "FFS": [[-1, 0, 0], [0, 0, -1], [0, -1, 0]],
    "FFP": [[1, 0, 0], [0, 0, -1], [0, 1, 0]],
}


def bev_axes(position, gantry, coll, couch):
    """The beam-limiting-device X and Y axes in patient coordinates."""
    g, c, t = (math.radians(a) for a in (gantry, coll, couch))
    xg = np.array([math.cos(g), 0, -math.sin(g)])   # gantry frame in fixed
    yg = np.array([0.0, 1, 0])
    xb = math.cos(c) * xg + math.sin(c) * yg        # collimator turns about the beam axis
    yb = -math.sin(c) * xg + math.cos(c) * yg
    rz = np.array([[math.cos(-t), -math.sin(-t), 0], [math.sin(-t), math.cos(-t), 0], [0, 0, 1]])
    p = np.array(POSITION[position], dtype=float)
    return p.T @ (rz @ xb), p.T @ (rz @ yb)


class Figures(unittest.TestCase):
    def check_svg_common(self, page, where):
        svgs = svgs_of(page)
        ids = re.findall(r'\bid="([^"]+)"', "".join(svgs))
        self.assertEqual(len(ids), len(set(ids)), "%s: ids repeated across figures" % where)
        parsed = []
        for k, text in enumerate(svgs):
            svg = ET.fromstring(text)   # raises if the figure is not well-formed XML
            here = "%s figure %d" % (where, k + 1)
            own = {e.get("id") for e in svg.iter() if e.get("id")}
            for e in svg.iter():
                for attr, v in e.attrib.items():
                    for ref in re.findall(r"#([A-Za-z][\w.-]*)", v if "url(" in v or attr == XLINK_HREF or attr == "href" else ""):
                        self.assertIn(ref, own, "%s: #%s does not resolve" % (here, ref))
            for path in svg.iter(SVG_NS + "path"):
                d = path.get("d") or ""
                try:
                    sub = parse_path(d)
                except ValueError as exc:
                    self.fail("%s: path data cut or malformed (%s): %s" % (here, exc, d[-80:]))
                filled = style_of(path).get("fill") != "none"
                if filled:
                    for sp in sub:
                        if len(sp) > 1:   # a lone M draws nothing
                            self.assertEqual(sp[-1][0], "Z", "%s: a filled path is open" % here)
            # text is SVG text (SVG 1.1, W3C, chapter 10 "Text") put where the
            # figure's marker was: none of the markers may be left, and every
            # text element carries its text and Pango's measured width
            for path in svg.iter(SVG_NS + "path"):
                self.assertNotIn("fill-opacity:0.0123", path.get("style") or "",
                                 "%s: a text marker was left in the figure" % here)
            for t in svg.iter(SVG_NS + "text"):
                self.assertTrue((t.text or "").strip(), "%s: an empty text element" % here)
                self.assertGreater(float(t.get("textLength")), 0, here)
            parsed.append(svg)
        return parsed

    def texts(self, svg):
        return ["".join(t.itertext()) for t in svg.iter(SVG_NS + "text")]

    def paths(self, svg):
        out = []
        for p in svg.iter(SVG_NS + "path"):
            out.append((style_of(p), parse_path(p.get("d") or "")))
        return out

    def test_estimate_reports(self):
        for case, extra in CASES.items():
            base = os.path.join(SOURCE_ROOT, "examples", case)
            plan, struct = os.path.join(base, "rtplan.dcm"), os.path.join(base, "rtstruct.dcm")
            with tempdir() as d:
                out = os.path.join(d, "r.html")
                rc, js, err = run("estimate", plan, struct, "--model", MODEL, "--html", out,
                                  "--format", "json", *extra)
                self.assertIn(rc, (0, 4), err)
                with open(out) as f:
                    page = f.read()
            report = json.loads(js)
            organs = report["organs"]
            svgs = self.check_svg_common(page, case)
            ds = pydicom.dcmread(plan)
            setup = {s.PatientSetupNumber: s.PatientPosition for s in ds.PatientSetupSequence}
            beams = {b.BeamNumber: b for b in ds.BeamSequence}
            kinds = {"bev": 0, "dd": 0, "dvh": 0}
            for svg in svgs:
                c = counts_of(svg)
                if "organs-drawn" in c:
                    kinds["bev"] += 1
                    # the patient directions drawn are the ones counted (and
                    # checked against IEC 61217 in check_bev), as text
                    texts = self.texts(svg)
                    for letter in c["directions"].split(","):
                        self.assertIn(letter, texts, "%s: direction %s not drawn" % (case, letter))
                    self.assertTrue(any("beam's-eye view" in t for t in texts), case)
                    self.check_bev(case, c, organs, beams[int(c["beam"])], setup)
                elif "curve" in c:
                    kinds["dd"] += 1
                    self.check_dose_distance(case, svg, c, organs)
                elif "dvh-steps" in c:
                    kinds["dvh"] += 1
                    o = organs[int(c["organ"])]
                    unit = 10 if o["kind"] == "fetus" else 1   # cGy -> mGy
                    self.assertAlmostEqual(float(c["dvh-max"]), o["course_max_cgy"] * unit,
                                           delta=1e-4 * o["course_max_cgy"] * unit + 1e-9,
                                           msg="%s: %s DVH max" % (case, o["roi"]))
                    self.assertAlmostEqual(float(c["dvh-volume"]), 100, places=6)
                else:
                    self.fail("%s: a figure with no counts" % case)
            self.assertGreaterEqual(kinds["bev"], 1, case)
            self.assertGreaterEqual(kinds["dd"], 1, case)
            # one histogram for every estimated organ with a volume
            want = sum(1 for o in organs if o["estimated"] and not o["point"]
                       and not o["geometry_measured_on_patient"])
            self.assertEqual(kinds["dvh"], want, case)

    def check_bev(self, case, c, organs, beam, setup):
        drawn, arrows = int(c["organs-drawn"]), int(c["arrows"])
        in_images = [o for o in organs if not o["geometry_measured_on_patient"]]
        self.assertEqual(drawn + arrows, len(in_images),
                         "%s: every organ drawn or pointed at" % case)
        self.assertEqual(int(c["labels"]), drawn, "%s: every organ drawn is labelled" % case)
        self.assertEqual(int(c["unlabelled"]), 0, case)
        # 25 cm from the field edge lies outside a picture of the field and
        # 11.5 cm around it, whatever the divergence of a body's depth
        far = [o for o in in_images if o["min_distance_cm"] > 25]
        self.assertGreaterEqual(arrows, len(far), case)
        if case == "chest-fetus":
            self.assertIn("Fetus", [o["roi"] for o in far])
        cp = beam.ControlPointSequence[0]
        x, y = bev_axes(setup[beam.ReferencedPatientSetupNumber], float(cp.GantryAngle),
                        float(cp.BeamLimitingDeviceAngle), float(cp.PatientSupportAngle))
        right, left, up, down = c["directions"].split(",")
        self.assertEqual(right, letters(x), case)
        self.assertEqual(left, letters(-x), case)
        self.assertEqual(up, letters(y), case)
        self.assertEqual(down, letters(-y), case)

    def check_dose_distance(self, case, svg, c, organs):
        # cairo merges consecutive collinear segments, so a path may hold
        # fewer vertices than points were drawn; what a cut would change is
        # the extent: the band and the curve must span the plot frame from
        # its left to its right edge (distance 0 to the axis' end), the band
        # closed back to its start
        n, nb = int(c["curve"]), int(c["band"])
        self.assertEqual(nb, 2 * n, case)
        paths = self.paths(svg)

        def xs(sp):
            return [a[0] for sub in sp for cmd, a in sub if cmd in "ML"]

        frames = [sp for st, sp in paths if st.get("fill") == "none" and len(sp) >= 1
                  and len(sp[0]) == 5 and sp[0][-1][0] == "Z"]
        self.assertTrue(frames, case)
        fx0, fx1 = min(xs(frames[0])), max(xs(frames[0]))
        # the band and the curve are thinned to 0.05 pt (fig_path_thin), so
        # they are told from the frame, rectangles and lines (2 to 4
        # vertices) by more than 5 vertices, not by their drawn count
        band = [sp for st, sp in paths if st.get("fill", "none") not in ("none", "rgb(100%,100%,100%)")
                and "fill-opacity" in st and len(xs(sp)) > 5]
        self.assertEqual(len(band), 1, "%s: one band" % case)
        self.assertEqual(band[0][0][-1][0], "Z", "%s: the band is closed" % case)
        self.assertLessEqual(len(xs(band[0])), nb)
        self.assertAlmostEqual(min(xs(band[0])), fx0, delta=0.02)
        self.assertAlmostEqual(max(xs(band[0])), fx1, delta=0.02)
        curves = [sp for st, sp in paths if st.get("fill") == "none"
                  and st.get("stroke-width") == "1.6" and len(xs(sp)) > 5]
        self.assertEqual(len(curves), 1, case)
        self.assertLessEqual(len(xs(curves[0])), n)
        self.assertAlmostEqual(min(xs(curves[0])), fx0, delta=0.02)
        self.assertAlmostEqual(max(xs(curves[0])), fx1, delta=0.02)
        o = organs[int(c["organ"])]
        self.assertEqual(int(c["levels"]), len(o["levels"]), "%s: %s levels" % (case, o["roi"]))

    def test_fit_report(self):
        with tempdir() as d:
            out, rep = os.path.join(d, "m.yaml"), os.path.join(d, "r.html")
            rc, _, err = run("fit", MEAS, "-o", out, "-r", rep, "--model-version",
                             "2026.12-demo", "--created", "2026-12-01T00:00:00Z", "-q")
            self.assertEqual(rc, 0, err)
            with open(rep) as f:
                page = f.read()
            with open(out) as f:
                model = yaml.safe_load(f)
        groups = {}
        for p in model["profiles"]:
            groups.setdefault((p["energy_mev"], p["applicator"]), []).append(
                len(p["points"]["distance_cm"]))
        svgs = self.check_svg_common(page, "fit report")
        self.assertEqual(len(svgs), len(groups))
        for svg, (key, npts) in zip(svgs, groups.items()):
            c = counts_of(svg)
            self.assertEqual(int(c["panels"]), len(npts), key)
            self.assertEqual([int(v) for v in c["points"].split(",")], npts, key)
            # every measured point is a dot: a round-capped stroke of
            # subpaths of no length, one path a panel, measured (red) and
            # residual (blue) alike
            dots = {}
            for st, sp in self.paths(svg):
                if st.get("stroke-linecap") == "round" and st.get("fill") == "none":
                    dots.setdefault(st.get("stroke"), []).append(len(sp))
            self.assertEqual(len(dots), 2, key)
            for colour, per_panel in dots.items():
                self.assertEqual(per_panel, npts, "%s %s" % (key, colour))


if __name__ == "__main__":
    unittest.main()
