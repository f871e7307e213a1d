"""The report a clinician signs, checked as a reader would check it.

Outside references: Python's csv module (the CSV loads as one tidy table),
json (the result block), html.parser (the HTML's order), and Debian's
poppler-utils: pdftotext (what a PDF page says) and pdfinfo (its paper size).
A4 is 595 x 842 pt and US Letter 612 x 792 pt (ISO 216; ANSI/ASME Y14.1).
"""
import csv
import io
import json
import os
import re
import shutil
import subprocess
import unittest

from common import SOURCE_ROOT, STRAYLINE, run, tempdir

MODEL = os.path.join(SOURCE_ROOT, "models", "demo-e1.yaml")
EX = os.path.join(SOURCE_ROOT, "examples")
CASES = {
    "face-lens": ["--prescription-isodose", "90"],
    "neck-device": ["--prescription-isodose", "90"],
    "chest-fetus": ["--prescription-isodose", "90", "--gestational-age", "12"],
}


def case_args(name, *extra):
    base = os.path.join(EX, name)
    return ["estimate", os.path.join(base, "rtplan.dcm"), os.path.join(base, "rtstruct.dcm"),
            "--model", MODEL] + CASES[name] + list(extra)


def pdftotext(path, first=None, last=None):
    args = ["pdftotext", "-layout"]
    if first:
        args += ["-f", str(first), "-l", str(last or first)]
    return subprocess.run(args + [path, "-"], capture_output=True, text=True,
                          check=True).stdout


def pdfinfo(path):
    out = subprocess.run(["pdfinfo", path], capture_output=True, text=True, check=True).stdout
    return dict(line.split(":", 1) for line in out.splitlines() if ":" in line)


EXPONENT = re.compile(r"\d[eE][+-]?\d")


class VerdictFirst(unittest.TestCase):
    def test_text_names_the_organs_before_anything_else(self):
        rc, out, err = run(*case_args("face-lens"))
        self.assertEqual(rc, 4)
        first = out.index("RESULT:")
        self.assertLess(first, out.index("organs (cGy):"))
        self.assertLess(first, out.index("cautions:"))
        line = out[first:].splitlines()[0]
        for organ in ("Lens_L", "Lens_R"):
            self.assertIn(organ, line)
        # the result ends the report too
        self.assertTrue(out.rstrip().splitlines()[-1].startswith("RESULT:"))

    def test_an_advised_measurement_is_attention(self):
        # chest-fetus: every fetal estimate is below 50 mGy, but the upper bound
        # reaches half of it, so a measurement is advised: exit 4, and the
        # result says so instead of an all clear
        rc, out, err = run(*case_args("chest-fetus"))
        self.assertEqual(rc, 4)
        line = out[out.index("RESULT:"):].splitlines()[0]
        self.assertIn("measurement advised", line)
        self.assertIn("Fetus", line)
        self.assertNotIn("no organ reaches its action level at this screening", line)

    def test_json_result_block(self):
        rc, out, err = run(*case_args("face-lens"), "--format", "json")
        js = json.loads(out)
        res = js["result"]
        self.assertTrue(res["needs_attention"])
        self.assertTrue(res["plan_as_delivered"])
        names = [o["organ"] for o in res["organs"] if o["verdict"] == "needs_attention"]
        self.assertIn("Lens_L", names)
        for o in res["organs"]:
            if o["level_text"]:
                self.assertTrue(o["level_text"].endswith(("cGy", "mGy")), o)


class WhatIfs(unittest.TestCase):
    OPTIONS = [
        (["--shield", "Lens_L=0.05"], "face-lens", "shield", "Lens_L"),
        (["--points"], "face-lens", "measured_points", None),
        (["--reference-dose", "300"], "face-lens", "reference_dose_by_hand", None),
        (["--fetus-rise", "5"], "chest-fetus", "fetus_shift", None),
    ]

    def test_every_what_if_is_in_every_format(self):
        for opts, case, kind, roi in self.OPTIONS:
            with self.subTest(opts=opts), tempdir() as d:
                html = os.path.join(d, "r.html")
                pdf = os.path.join(d, "r.pdf")
                rc, out, err = run(*case_args(case, *opts), "--html", html, "--pdf", pdf)
                self.assertIn(rc, (0, 4), err)
                head = out[:out.index("RESULT:")]
                self.assertIn("WHAT-IF, NOT THE PLAN AS DELIVERED", head)
                self.assertIn("[what-if]", out)
                rc, js, err = run(*case_args(case, *opts), "--format", "json")
                res = json.loads(js)["result"]
                self.assertFalse(res["plan_as_delivered"])
                self.assertIn(kind, [w["kind"] for w in res["what_ifs"]])
                organs = json.loads(js)["organs"]
                marked = [o["roi"] for o in organs if o["what_if"]]
                if roi:
                    self.assertEqual(marked, [roi])
                else:
                    self.assertTrue(marked)
                page = open(html, encoding="utf-8").read()
                self.assertLess(page.index("WHAT-IF, NOT THE PLAN AS DELIVERED"),
                                page.index('id="verdict"'))
                rc, csv_out, err = run(*case_args(case, *opts), "--format", "csv")
                rows = list(csv.DictReader(io.StringIO(csv_out)))
                self.assertTrue(any(r["what_if"] == "yes" for r in rows))
                if shutil.which("pdftotext"):
                    self.assertIn("WHAT-IF", pdftotext(pdf, 1))

    def test_the_plan_as_delivered_has_no_banner(self):
        rc, out, err = run(*case_args("neck-device"))
        self.assertNotIn("WHAT-IF", out)
        self.assertNotIn("[what-if]", out)


class BolusInTheReport(unittest.TestCase):
    """A bolus the beam names (DICOM PS3.3 C.8.8.14, Referenced Bolus
    Sequence) moves every depth of its beam: each format says so as a
    caution of this case, and --no-bolus is a what-if in each format.
    Python's json and csv modules read the outputs; pdftotext the PDF."""

    CAUTION = "bolus 'Bolus_1cm' (named by the beam) is counted in the depths"

    def make(self, d, referenced=True):
        import rtbuild as rb
        from test_locate import box_phantom
        bolus = {"name": "Bolus_1cm", "type": "BOLUS",
                 "contours": rb.box(-200.0, 200.0, -10.0, 0.0, -150.0, 150.0, 5.0)}
        # a lens-named POINT 5 cm outside the 10 cm field, 5 mm below the skin
        return box_phantom(d, points=[("Lens_L", (100.0, 5.0, 0.0))], extra_rois=[bolus],
                           beam_extra={"boli": [3]} if referenced else None, ssd_mm=990.0)

    def test_a_bolus_the_beam_does_not_name_is_counted_and_said(self):
        with tempdir() as d:
            plan, ss = self.make(d, referenced=False)
            rc, js, err = run("estimate", plan, ss, "--model", MODEL, "--format", "json")
            res = json.loads(js)
            self.assertTrue(any("the beam names no bolus, but 'Bolus_1cm' is typed BOLUS" in c
                                for c in res["result"]["case_cautions"]),
                            res["result"]["case_cautions"])
            slant = (10 ** 2 + 100.5 ** 2) ** 0.5 / 100.5
            self.assertAlmostEqual(res["organs"][0]["min_depth_cm"], 1.5 * slant, delta=1e-6)

    def test_caution_in_every_format_and_no_bolus_what_if(self):
        with tempdir() as d:
            plan, ss = self.make(d)
            base = ["estimate", plan, ss, "--model", MODEL]
            html, pdf = os.path.join(d, "r.html"), os.path.join(d, "r.pdf")
            rc, out, err = run(*base, "--html", html, "--pdf", pdf)
            self.assertIn(rc, (0, 4), err)
            self.assertIn(self.CAUTION, out[out.index("this case:"):])
            self.assertNotIn("WHAT-IF", out)
            self.assertIn(self.CAUTION, open(html, encoding="utf-8").read())
            if shutil.which("pdftotext"):
                self.assertIn("Bolus_1cm", re.sub(r"\s+", " ", pdftotext(pdf)))
            rc, js, err = run(*base, "--format", "json")
            res = json.loads(js)
            self.assertTrue(any(self.CAUTION in c for c in res["result"]["case_cautions"]))
            with_bolus = res["organs"][0]
            rc, csv_out, err = run(*base, "--format", "csv")
            rows = list(csv.DictReader(io.StringIO(csv_out)))
            self.assertTrue(all(self.CAUTION in r["cautions"] for r in rows))

            rc, js, err = run(*base, "--no-bolus", "--format", "json")
            res = json.loads(js)
            self.assertFalse(res["result"]["plan_as_delivered"])
            self.assertIn("no_bolus", [w["kind"] for w in res["result"]["what_ifs"]])
            # it moves the SSD found on the body as well, and says so
            self.assertTrue(any("and of the SSD found where the central axis enters" in w["text"]
                                for w in res["result"]["what_ifs"]), res["result"]["what_ifs"])
            self.assertFalse(any(self.CAUTION in c for c in res["result"]["case_cautions"]))
            without = res["organs"][0]
            self.assertTrue(without["what_if"])
            # 1 cm less tissue on the ray (hand geometry: 0.5 cm instead of 1.5 cm,
            # times the slant of the ray 10 cm off axis)
            slant = (10 ** 2 + 100.5 ** 2) ** 0.5 / 100.5
            self.assertAlmostEqual(with_bolus["min_depth_cm"], 1.5 * slant, delta=1e-6)
            self.assertAlmostEqual(without["min_depth_cm"], 0.5 * slant, delta=1e-6)
            self.assertNotEqual(with_bolus["course_max_cgy"], without["course_max_cgy"])
            rc, out, err = run(*base, "--no-bolus", "--html", html, "--pdf", pdf)
            head = out[:out.index("RESULT:")]
            self.assertIn("WHAT-IF, NOT THE PLAN AS DELIVERED: bolus left out", head)
            self.assertIn("[what-if]", out)
            page = open(html, encoding="utf-8").read()
            self.assertLess(page.index("WHAT-IF, NOT THE PLAN AS DELIVERED"),
                            page.index('id="verdict"'))
            rc, csv_out, err = run(*base, "--no-bolus", "--format", "csv")
            rows = list(csv.DictReader(io.StringIO(csv_out)))
            self.assertTrue(any(r["what_if"] == "yes" for r in rows))
            if shutil.which("pdftotext"):
                self.assertIn("WHAT-IF", pdftotext(pdf, 1))


class HtmlPrint(unittest.TestCase):
    def test_printed_pages_name_the_patient(self):
        """CSS paged media (W3C css-page-3 margin boxes): every printed page of
        the HTML names the patient and counts itself."""
        with tempdir() as d:
            html = os.path.join(d, "r.html")
            run(*case_args("face-lens"), "--html", html)
            page = open(html, encoding="utf-8").read()
            self.assertIn('@top-right{content:"Patient DEMO^LENS, ID DEMO-LENS-01', page)
            self.assertIn('counter(page) " of " counter(pages)', page)
            self.assertLess(page.index('id="verdict"'), page.index('id="cautions"'))


class UnitsAndNumbers(unittest.TestCase):
    def test_no_exponent_and_one_unit_a_table(self):
        for case in CASES:
            with self.subTest(case=case), tempdir() as d:
                html = os.path.join(d, "r.html")
                rc, out, err = run(*case_args(case), "--html", html)
                self.assertIsNone(EXPONENT.search(out), case)
                page = open(html, encoding="utf-8").read()
                text = re.sub(r"<svg.*?</svg>", "", page, flags=re.S)
                text = re.sub(r"<style.*?</style>", "", text, flags=re.S)
                text = re.sub(r"<[^>]+>", " ", text)
                # SHA-256 digests and UIDs are not numbers a person reads
                text = re.sub(r"\b[0-9a-f]{64}\b|\b[0-9]+(\.[0-9]+){3,}\b", "", text)
                self.assertIsNone(EXPONENT.search(text), case)
                self.assertNotIn("level (Gy)", out + page)
        rc, out, err = run(*case_args("chest-fetus"))
        fetus = out[out.index("fetus (mGy"):]
        self.assertIn("mGy", fetus.splitlines()[2])

    def test_model_eval_has_no_exponent(self):
        rc, out, err = run("model", "eval", MODEL, "--energy", "9", "--applicator", "A06",
                           "--depth", "1", "--distance", "38")
        self.assertEqual(rc, 0, err)
        self.assertIsNone(EXPONENT.search(out), out)


class TidyCsv(unittest.TestCase):
    def test_every_demo_csv_loads_as_one_table(self):
        """Python's csv.DictReader: every row has the same keys, no extra rows."""
        for case in CASES:
            with self.subTest(case=case):
                rc, out, err = run(*case_args(case), "--format", "csv")
                reader = csv.DictReader(io.StringIO(out))
                rows = list(reader)
                self.assertTrue(rows)
                for r in rows:
                    self.assertEqual(set(r), set(reader.fieldnames))
                    self.assertNotIn(None, r.values())
                    self.assertFalse(r["roi"].startswith("#"))
                    self.assertTrue(r["plan_uid"] and r["patient_id"] and r["model_version"])


@unittest.skipUnless(shutil.which("pdftotext") and shutil.which("pdfinfo"),
                     "poppler-utils not installed")
class Pdf(unittest.TestCase):
    def test_demo_pdfs(self):
        ids = {"face-lens": "DEMO-LENS-01", "neck-device": "DEMO-DEVICE-03",
               "chest-fetus": "DEMO-FETUS-02"}
        for case in CASES:
            for paper, size in (("a4", (595, 842)), ("letter", (612, 792))):
                with self.subTest(case=case, paper=paper), tempdir() as d:
                    pdf = os.path.join(d, "r.pdf")
                    rc, out, err = run(*case_args(case), "--pdf", pdf, "--paper", paper)
                    self.assertIn(rc, (0, 4), err)
                    info = pdfinfo(pdf)
                    w, h = re.findall(r"[\d.]+", info["Page size"])[:2]
                    self.assertEqual((round(float(w)), round(float(h))), size)
                    pages = int(info["Pages"])
                    js = json.loads(run(*case_args(case), "--format", "json")[1])
                    flagged = [o["organ"] for o in js["result"]["organs"]]
                    p1 = pdftotext(pdf, 1)
                    for organ in flagged:
                        self.assertIn(organ, p1)
                        self.assertLess(p1.index(organ), p1.index("Cautions")
                                        if "Cautions" in p1 else len(p1))
                    self.assertIn("prepared by", p1)
                    self.assertIn("reviewed by", p1)
                    for n in range(1, pages + 1):
                        page = pdftotext(pdf, n)
                        self.assertIn(ids[case], page, "page %d" % n)
                        self.assertIn("page %d of %d" % (n, pages), page)

    def test_pdf_to_standard_output(self):
        with tempdir() as d:
            p = subprocess.run([STRAYLINE] + case_args("neck-device") +
                               ["--pdf", "-", "--output", os.path.join(d, "r.txt")],
                               capture_output=True)
        self.assertIn(p.returncode, (0, 4), p.stderr)
        self.assertTrue(p.stdout.startswith(b"%PDF-"))


@unittest.skipUnless(shutil.which("dciodvfy") and shutil.which("dcmdump"),
                     "dicom3tools or dcmtk not installed")
class PdfDicom(unittest.TestCase):
    def test_encapsulated_pdf_of_the_demo(self):
        """--pdf-dicom: checked by dciodvfy (Debian dicom3tools) against the
        Encapsulated PDF IOD (PS3.3 A.45), read back by dcmdump (DCMTK) and
        pydicom; the PDF inside is --pdf's, byte for byte."""
        import pydicom
        base = os.path.join(EX, "face-lens")
        plan = pydicom.dcmread(os.path.join(base, "rtplan.dcm"))
        with tempdir() as d:
            pdf, dcm = os.path.join(d, "r.pdf"), os.path.join(d, "r.dcm")
            rc, out, err = run(*case_args("face-lens"), "--pdf", pdf, "--pdf-dicom", dcm)
            self.assertIn(rc, (0, 4), err)
            v = subprocess.run(["dciodvfy", dcm], capture_output=True, text=True)
            errors = [l for l in (v.stdout + v.stderr).splitlines() if l.startswith("Error")]
            self.assertEqual(errors, [])
            dump = subprocess.run(["dcmdump", dcm], capture_output=True, text=True).stdout
            self.assertIn(plan.PatientID, dump)
            self.assertIn(plan.StudyInstanceUID, dump)
            self.assertIn("=EncapsulatedPDFStorage", dump)
            obj = pydicom.dcmread(dcm)
            inside = bytes(obj.EncapsulatedDocument)[:int(obj.EncapsulatedDocumentLength)]
            self.assertEqual(inside, open(pdf, "rb").read())
            self.assertNotEqual(obj.SeriesInstanceUID, plan.SeriesInstanceUID)
            rc, out, err = run(*case_args("face-lens"), "--pdf-dicom",
                               os.path.join(base, "rtplan.dcm"))
            self.assertEqual(rc, 2)
            self.assertIn("refusing to write over an input file", err)


@unittest.skipUnless(shutil.which("pdfinfo"), "poppler-utils not installed")
class FitPdf(unittest.TestCase):
    def test_fit_report_pdf_is_small_multiples(self):
        """Small multiples (pdfinfo, poppler-utils): the demo's profiles print
        on a page for each energy and applicator (more where it has more than
        six rows of tilts and SSDs) plus the title page, not one a profile."""
        import yaml
        ms = os.path.join(EX, "commissioning", "demo-e1", "measurements.yaml")
        with tempdir() as d:
            pdf = os.path.join(d, "fit.pdf")
            rc, out, err = run("fit", ms, "-o", os.path.join(d, "m.yaml"), "--report-pdf", pdf,
                               "--paper", "letter", "-q")
            self.assertEqual(rc, 0, err)
            info = pdfinfo(pdf)
            model = yaml.safe_load(open(os.path.join(d, "m.yaml")))
            groups = {(p["energy_mev"], p["applicator"]) for p in model["profiles"]}
            self.assertGreater(len(model["profiles"]), 3 * len(groups))
            # a row of panels an insert, direction, SSD and tilt, at most six
            # rows a page (the tilted and extended-SSD groups take more)
            rows = {}
            for p in model["profiles"]:
                rows.setdefault((p["energy_mev"], p["applicator"]), set()).add(
                    (p["insert"], p["direction"], p["ssd_cm"], p["tilt_deg"]))
            pages = sum((len(r) + 5) // 6 for r in rows.values())
            self.assertGreater(pages, len(groups))
            self.assertEqual(int(info["Pages"]), pages + 1)
            w, h = re.findall(r"[\d.]+", info["Page size"])[:2]
            self.assertEqual((round(float(w)), round(float(h))), (612, 792))


class OutputFiles(unittest.TestCase):
    def test_dash_and_output(self):
        with tempdir() as d:
            out_file = os.path.join(d, "r.json")
            rc, out, err = run(*case_args("neck-device"), "--format", "json", "-o", out_file,
                               "--html", "-")
            self.assertIn(rc, (0, 4), err)
            self.assertIn("<html", out)
            self.assertIn("result", json.load(open(out_file)))
            rc, out, err = run(*case_args("neck-device"), "--html", "-")
            self.assertEqual(rc, 2)
            self.assertIn("only one report can go to standard output", err)


if __name__ == "__main__":
    unittest.main()
