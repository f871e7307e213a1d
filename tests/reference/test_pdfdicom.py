"""The DICOM Encapsulated PDF writer (sl_dicom_write_pdf), called through the
test helper tests/helpers/pdf_dicom.c on the shipped demo plans, checked with
tools outside the project:

- dciodvfy (Debian dicom3tools) verifies the object against the Encapsulated
  PDF IOD of PS3.3 A.45.1: no "Error" line is allowed (and none of its
  warnings are expected either).
- dcmdump (Debian dcmtk) shows the SOP Class, the Patient ID and the Study
  Instance UID.
- pydicom (Debian python3-pydicom) reads the object and gives back the PDF
  byte for byte (PS3.3 C.24.2: an odd-length document carries one trailing
  padding byte; Encapsulated Document Length holds the true length).

The fixture tests/data/pdf/sample.pdf is an invented one-page PDF written by
cairo (tests/data/pdf/make_sample.c).
"""
import os
import shutil
import subprocess
import unittest

import pydicom

from common import SOURCE_ROOT, tempdir

HELPER = os.environ.get("SL_PDF_DICOM",
                        os.path.join(SOURCE_ROOT, "build", "tests", "pdf_dicom"))
SAMPLE = os.path.join(SOURCE_ROOT, "tests", "data", "pdf", "sample.pdf")
CASES = ["face-lens", "chest-fetus", "neck-device"]
PDF_SOP_CLASS = "1.2.840.10008.5.1.4.1.1.104.1"  # PS3.4 B.5, Encapsulated PDF Storage
RTPLAN_SOP_CLASS = "1.2.840.10008.5.1.4.1.1.481.5"  # PS3.4 B.5, RT Plan Storage
TITLE = "Out-of-field dose screening report"


def plan(case):
    return os.path.join(SOURCE_ROOT, "examples", case, "rtplan.dcm")


def wrap(out, plan_path, pdf_path, title=TITLE):
    p = subprocess.run([HELPER, out, plan_path, pdf_path, title], capture_output=True,
                       text=True, timeout=120)
    return p.returncode, p.stdout, p.stderr


def dciodvfy(path):
    """dciodvfy's report: (error lines, warning lines)."""
    p = subprocess.run(["dciodvfy", path], capture_output=True, text=True, timeout=120)
    lines = (p.stdout + p.stderr).splitlines()
    return ([ln for ln in lines if ln.startswith("Error")],
            [ln for ln in lines if ln.startswith("Warning")])


def read_sample():
    with open(SAMPLE, "rb") as f:
        return f.read()


class EncapsulatedPdf(unittest.TestCase):
    def write_ok(self, out, plan_path, pdf_path, title=TITLE):
        rc, so, se = wrap(out, plan_path, pdf_path, title)
        self.assertEqual(rc, 0, se)
        self.assertEqual(se, "")
        return pydicom.dcmread(out)

    def test_demo_plans_pass_dciodvfy(self):
        """dciodvfy (dicom3tools), the IOD of PS3.3 A.45.1: no errors, no warnings."""
        with tempdir() as d:
            for case in CASES:
                out = os.path.join(d, case + ".dcm")
                self.write_ok(out, plan(case), SAMPLE)
                errors, warnings = dciodvfy(out)
                self.assertEqual(errors, [], case)
                self.assertEqual(warnings, [], case)

    def test_patient_and_study_are_the_plans(self):
        """pydicom reads plan and document: same patient and study, a new series
        and instance (PS3.3 A.45.1: Patient and General Study modules)."""
        with tempdir() as d:
            for case in CASES:
                p = pydicom.dcmread(plan(case))
                out = os.path.join(d, case + ".dcm")
                doc = self.write_ok(out, plan(case), SAMPLE)
                self.assertEqual(doc.SOPClassUID, PDF_SOP_CLASS)
                self.assertEqual(doc.file_meta.MediaStorageSOPClassUID, PDF_SOP_CLASS)
                self.assertEqual(doc.file_meta.TransferSyntaxUID, "1.2.840.10008.1.2.1")
                for kw in ("PatientName", "PatientID", "PatientBirthDate", "PatientSex",
                           "StudyInstanceUID", "StudyDate", "StudyTime", "StudyID",
                           "AccessionNumber", "ReferringPhysicianName",
                           "SpecificCharacterSet"):
                    self.assertEqual(doc.get(kw), p.get(kw), "%s %s" % (case, kw))
                self.assertNotEqual(doc.SeriesInstanceUID, p.SeriesInstanceUID)
                self.assertNotEqual(doc.SOPInstanceUID, p.SOPInstanceUID)
                self.assertEqual(doc.Modality, "DOC")
                self.assertEqual(doc.MIMETypeOfEncapsulatedDocument, "application/pdf")
                self.assertEqual(doc.DocumentTitle, TITLE)
                self.assertEqual(doc.BurnedInAnnotation, "YES")
                self.assertEqual(doc.ConversionType, "WSD")
                self.assertEqual(doc.Manufacturer, "strayline")
                src = doc.SourceInstanceSequence[0]
                self.assertEqual(src.ReferencedSOPClassUID, RTPLAN_SOP_CLASS)
                self.assertEqual(src.ReferencedSOPInstanceUID, p.SOPInstanceUID)

    def test_two_documents_get_new_uids(self):
        with tempdir() as d:
            a = self.write_ok(os.path.join(d, "a.dcm"), plan("face-lens"), SAMPLE)
            b = self.write_ok(os.path.join(d, "b.dcm"), plan("face-lens"), SAMPLE)
            self.assertNotEqual(a.SOPInstanceUID, b.SOPInstanceUID)
            self.assertNotEqual(a.SeriesInstanceUID, b.SeriesInstanceUID)

    def test_dcmdump_shows_patient_study_and_class(self):
        """dcmdump (dcmtk) names the SOP class and shows the plan's Patient ID
        and Study Instance UID."""
        p = pydicom.dcmread(plan("chest-fetus"))
        with tempdir() as d:
            out = os.path.join(d, "doc.dcm")
            self.write_ok(out, plan("chest-fetus"), SAMPLE)
            dump = subprocess.run(["dcmdump", out], capture_output=True, text=True,
                                  timeout=60, check=True).stdout
            self.assertIn("=EncapsulatedPDFStorage", dump)
            self.assertIn("(0010,0020) LO [%s]" % p.PatientID, dump)
            self.assertIn("(0020,000d) UI [%s]" % p.StudyInstanceUID, dump)
            self.assertIn("(0042,0012) LO [application/pdf]", dump)

    def test_pdf_comes_back_byte_identical(self):
        """pydicom: the Encapsulated Document, cut to Encapsulated Document
        Length, is the input; odd and even lengths (PS3.5 7.1.1: values have
        even length, an odd document gets one padding byte)."""
        data = read_sample()
        with tempdir() as d:
            for extra in (b"", b"\n"):  # a newline after %%EOF keeps a valid PDF
                pdf = os.path.join(d, "in.pdf")
                with open(pdf, "wb") as f:
                    f.write(data + extra)
                want = data + extra
                out = os.path.join(d, "doc.dcm")
                doc = self.write_ok(out, plan("face-lens"), pdf)
                got = doc.EncapsulatedDocument
                self.assertEqual(len(got) % 2, 0)
                self.assertEqual(len(got), len(want) + len(want) % 2)
                self.assertEqual(doc.EncapsulatedDocumentLength, len(want))
                self.assertEqual(bytes(got[:doc.EncapsulatedDocumentLength]), want)
                if len(want) % 2:
                    self.assertEqual(got[-1:], b"\x00")
                errors, _ = dciodvfy(out)
                self.assertEqual(errors, [])

    def test_plan_without_type2_values(self):
        """A plan without Study Date, Study Time, Referring Physician, Accession
        Number, Patient's Birth Date or Sex: the document carries them empty
        (Type 2 in PS3.3 C.7.1.1 and C.7.2.1) and dciodvfy stays clean."""
        with tempdir() as d:
            p = pydicom.dcmread(plan("face-lens"))
            for kw in ("StudyDate", "StudyTime", "ReferringPhysicianName", "AccessionNumber",
                       "PatientBirthDate", "PatientSex", "StudyID"):
                if kw in p:
                    delattr(p, kw)
            src = os.path.join(d, "plan.dcm")
            p.save_as(src, write_like_original=False)
            out = os.path.join(d, "doc.dcm")
            doc = self.write_ok(out, src, SAMPLE)
            for kw in ("StudyDate", "StudyTime", "ReferringPhysicianName", "AccessionNumber",
                       "PatientBirthDate", "PatientSex", "StudyID"):
                self.assertIn(kw, doc)
                self.assertEqual(doc.get(kw), "")
            errors, _ = dciodvfy(out)
            self.assertEqual(errors, [])

    def test_title_beyond_ascii_in_latin1_plan(self):
        """A title with an accented letter in a plan encoded in ISO_IR 100: the
        object goes to UTF-8 (ISO_IR 192) and pydicom decodes both the title
        and the patient's name as written."""
        with tempdir() as d:
            p = pydicom.dcmread(plan("face-lens"))
            p.SpecificCharacterSet = "ISO_IR 100"
            p.PatientName = "DEMO^LÉNS"
            src = os.path.join(d, "plan.dcm")
            p.save_as(src, write_like_original=False)
            out = os.path.join(d, "doc.dcm")
            doc = self.write_ok(out, src, SAMPLE, "Dépistage hors champ")
            self.assertEqual(doc.SpecificCharacterSet, "ISO_IR 192")
            self.assertEqual(doc.DocumentTitle, "Dépistage hors champ")
            self.assertEqual(str(doc.PatientName), "DEMO^LÉNS")
            errors, _ = dciodvfy(out)
            self.assertEqual(errors, [])


class Refusals(unittest.TestCase):
    def refused(self, code, args, *words):
        rc, so, se = wrap(*args)
        self.assertEqual(rc, code, se)
        self.assertEqual(len(se.strip().splitlines()), 1, se)
        for w in words:
            self.assertIn(w, se)
        return se

    def test_structure_set_as_plan(self):
        with tempdir() as d:
            out = os.path.join(d, "doc.dcm")
            rs = os.path.join(SOURCE_ROOT, "examples", "face-lens", "rtstruct.dcm")
            self.refused(3, (out, rs, SAMPLE), rs, "RT Plan")
            self.assertEqual(os.listdir(d), [])

    def test_missing_plan(self):
        with tempdir() as d:
            out = os.path.join(d, "doc.dcm")
            missing = os.path.join(d, "nope.dcm")
            self.refused(3, (out, missing, SAMPLE), missing)
            self.assertEqual(os.listdir(d), [])

    def test_plan_without_study_uid(self):
        with tempdir() as d:
            p = pydicom.dcmread(plan("face-lens"))
            del p.StudyInstanceUID
            src = os.path.join(d, "plan.dcm")
            p.save_as(src, write_like_original=False)
            out = os.path.join(d, "doc.dcm")
            self.refused(3, (out, src, SAMPLE), src, "StudyInstanceUID (0020,000D)")
            self.assertFalse(os.path.exists(out))

    def test_output_directory_missing(self):
        with tempdir() as d:
            out = os.path.join(d, "no", "doc.dcm")
            self.refused(1, (out, plan("face-lens"), SAMPLE), out)

    def test_never_over_the_plan(self):
        with tempdir() as d:
            src = os.path.join(d, "plan.dcm")
            shutil.copy(plan("face-lens"), src)
            before = open(src, "rb").read()
            self.refused(2, (src, src, SAMPLE), src, "input")
            self.assertEqual(open(src, "rb").read(), before)
            self.assertEqual(os.listdir(d), ["plan.dcm"])

    def test_title_with_a_line_break(self):
        with tempdir() as d:
            out = os.path.join(d, "doc.dcm")
            self.refused(2, (out, plan("face-lens"), SAMPLE, "two\nlines"), "Document Title")
            self.assertEqual(os.listdir(d), [])

    def test_not_a_pdf(self):
        with tempdir() as d:
            out = os.path.join(d, "doc.dcm")
            self.refused(1, (out, plan("face-lens"), plan("face-lens")), "not a PDF")


if __name__ == "__main__":
    unittest.main()
