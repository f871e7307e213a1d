"""`strayline inspect --format json` against pydicom (Debian python3-pydicom),
an independent DICOM reader: every value strayline reports must equal what
pydicom reads from the same file, in every transfer syntax and with or
without the file meta header. Also the real sample files that Debian's
pydicom ships, and dciodvfy (Debian dicom3tools) on the shipped demo cases.
"""
import math
import os
import shutil
import subprocess
import unittest

import pydicom

from common import PYDICOM_TEST_FILES, SOURCE_ROOT, run, run_json, tempdir
import rtbuild as rb  # noqa: E402 (common puts examples/generator on the path)

CASES = ["face-lens", "chest-fetus", "neck-device", "chest-oblique"]


def cm(v):
    return None if v is None else float(v) / 10.0


def opt(ds, name):
    v = getattr(ds, name, None)
    if v is None or v == "":
        return None
    return v


class Compare(unittest.TestCase):
    def close(self, got, want, what, tol=1e-5):
        if want is None:
            self.assertIsNone(got, what)
            return
        self.assertIsNotNone(got, what)
        self.assertTrue(math.isclose(got, float(want), rel_tol=tol, abs_tol=1e-9),
                        "%s: strayline %r, pydicom %r" % (what, got, want))

    def same_str(self, got, want, what):
        want = None if want in (None, "") else str(want)
        self.assertEqual(got, want, what)

    def check_plan(self, js, path):
        d = pydicom.dcmread(path, force=True)
        self.same_str(js["sop_instance_uid"], d.SOPInstanceUID, "SOP Instance UID")
        self.same_str(js["label"], opt(d, "RTPlanLabel"), "RT Plan Label")
        self.same_str(js["name"], opt(d, "RTPlanName"), "RT Plan Name")
        self.same_str(js["patient_id"], opt(d, "PatientID"), "Patient ID")
        self.same_str(js["patient_name"], opt(d, "PatientName"), "Patient Name")
        self.same_str(js["frame_of_reference_uid"], opt(d, "FrameOfReferenceUID"), "frame")
        rss = opt(d, "ReferencedStructureSetSequence")
        self.same_str(js["referenced_structure_set_uid"],
                      rss[0].ReferencedSOPInstanceUID if rss else None, "structure set UID")
        setups = d.PatientSetupSequence
        self.assertEqual(len(js["setups"]), len(setups))
        for got, s in zip(js["setups"], setups):
            self.assertEqual(got["number"], int(s.PatientSetupNumber))
            self.assertEqual(got["patient_position"], s.PatientPosition)
        self.assertEqual(len(js["fraction_groups"]), len(d.FractionGroupSequence))
        for got, fg in zip(js["fraction_groups"], d.FractionGroupSequence):
            self.assertEqual(got["number"], int(fg.FractionGroupNumber))
            self.assertEqual(got["fractions_planned"], int(fg.NumberOfFractionsPlanned))
            self.assertEqual(len(got["beams"]), len(fg.ReferencedBeamSequence))
            for gb, rb_ in zip(got["beams"], fg.ReferencedBeamSequence):
                self.assertEqual(gb["beam_number"], int(rb_.ReferencedBeamNumber))
                self.close(gb["meterset_mu"], opt(rb_, "BeamMeterset"), "Beam Meterset")
                self.close(gb["beam_dose_gy"], opt(rb_, "BeamDose"), "Beam Dose")
        drs = opt(d, "DoseReferenceSequence") or []
        self.assertEqual(len(js["dose_references"]), len(drs))
        for got, dr in zip(js["dose_references"], drs):
            self.close(got["target_prescription_gy"], opt(dr, "TargetPrescriptionDose"),
                       "Target Prescription Dose")
            self.same_str(got["type"], opt(dr, "DoseReferenceType"), "Dose Reference Type")
        self.assertEqual(len(js["beams"]), len(d.BeamSequence))
        for got, b in zip(js["beams"], d.BeamSequence):
            self.check_beam(got, b)

    def check_beam(self, got, b):
        what = "beam %s" % b.BeamNumber
        self.assertEqual(got["number"], int(b.BeamNumber), what)
        self.same_str(got["name"], opt(b, "BeamName"), what + " name")
        self.same_str(got["description"], opt(b, "BeamDescription"), what + " description")
        self.same_str(got["radiation_type"], b.RadiationType, what)
        self.same_str(got["treatment_delivery_type"], opt(b, "TreatmentDeliveryType") or "TREATMENT",
                      what)
        self.same_str(got["beam_type"], opt(b, "BeamType"), what)
        self.same_str(got["treatment_machine"], opt(b, "TreatmentMachineName"), what)
        self.close(got["sad_cm"], cm(opt(b, "SourceAxisDistance") or 1000.0), what + " SAD")
        self.assertEqual(got["sad_assumed"], opt(b, "SourceAxisDistance") is None)
        self.assertEqual(got["control_points"], len(b.ControlPointSequence))
        cp = b.ControlPointSequence[0]
        self.close(got["energy_mev"], opt(cp, "NominalBeamEnergy"), what + " energy")
        self.close(got["gantry_deg"], opt(cp, "GantryAngle"), what + " gantry")
        self.close(got["collimator_deg"], opt(cp, "BeamLimitingDeviceAngle"), what + " collimator")
        self.close(got["couch_deg"], opt(cp, "PatientSupportAngle"), what + " couch")
        self.close(got["table_top_eccentric_deg"], opt(cp, "TableTopEccentricAngle") or 0.0, what)
        iso = opt(cp, "IsocenterPosition")
        if iso is None:
            self.assertIsNone(got["isocenter_cm"])
        else:
            for g, w in zip(got["isocenter_cm"], iso):
                self.close(g, cm(w), what + " isocentre")
        self.close(got["ssd_cm"], cm(opt(cp, "SourceToSurfaceDistance")), what + " SSD")
        apps = opt(b, "ApplicatorSequence")
        if got["estimated"]:
            self.assertIsNone(got["skip_reason"])
        else:
            self.assertTrue(got["skip_reason"])
        if apps:
            a, ga = apps[0], got["applicator"]
            self.same_str(ga["id"], a.ApplicatorID, what + " applicator")
            self.same_str(ga["type"], a.ApplicatorType, what + " applicator type")
            self.same_str(ga["description"], opt(a, "ApplicatorDescription"), what)
            geo = opt(a, "ApplicatorGeometrySequence")
            g0 = geo[0] if geo else None
            self.same_str(ga["aperture_shape"], opt(g0, "ApplicatorApertureShape") if g0 else None,
                          what + " aperture shape")
            self.close(ga["opening_cm"], cm(opt(g0, "ApplicatorOpening")) if g0 else None, what)
            self.close(ga["opening_x_cm"], cm(opt(g0, "ApplicatorOpeningX")) if g0 else None, what)
            self.close(ga["opening_y_cm"], cm(opt(g0, "ApplicatorOpeningY")) if g0 else None, what)
        elif got["estimated"]:
            self.assertIsNone(got["applicator"])
        blocks = opt(b, "BlockSequence") or []
        self.assertEqual(len(got["blocks"]), len(blocks), what + " blocks")
        for gb, blk in zip(got["blocks"], blocks):
            self.same_str(gb["type"], blk.BlockType, what + " block type")
            self.same_str(gb["name"], opt(blk, "BlockName"), what + " block name")
            self.same_str(gb["material"], opt(blk, "MaterialID"), what + " material")
            self.same_str(gb["divergence"], opt(blk, "BlockDivergence"), what + " divergence")
            self.close(gb["source_to_tray_cm"], cm(opt(blk, "SourceToBlockTrayDistance")), what)
            self.close(gb["thickness_cm"], cm(opt(blk, "BlockThickness")), what)
            self.assertEqual(gb["points"], int(blk.BlockNumberOfPoints))
            data = [float(v) for v in blk.BlockData]
            self.assertEqual(len(gb["points_cm"]) * 2, len(data))
            for k, (x, y) in enumerate(gb["points_cm"]):
                self.close(x, data[2 * k] / 10, what + " block x")
                self.close(y, data[2 * k + 1] / 10, what + " block y")
        boli = opt(b, "ReferencedBolusSequence") or []
        self.assertEqual(got["referenced_bolus_roi_numbers"],
                         [int(x.ReferencedROINumber) for x in boli])
        self.assertEqual(got["setup_number"],
                         int(b.ReferencedPatientSetupNumber) if "ReferencedPatientSetupNumber" in b
                         else None)

    def check_structures(self, js, path):
        d = pydicom.dcmread(path, force=True)
        self.same_str(js["sop_instance_uid"], d.SOPInstanceUID, "SOP Instance UID")
        self.same_str(js["label"], opt(d, "StructureSetLabel"), "label")
        rois = d.StructureSetROISequence
        self.assertEqual(len(js["rois"]), len(rois))
        contours = {int(c.ReferencedROINumber): c for c in d.ROIContourSequence}
        types = {int(o.ReferencedROINumber): o.RTROIInterpretedType
                 for o in getattr(d, "RTROIObservationsSequence", [])}
        for got, r in zip(js["rois"], rois):
            n = int(r.ROINumber)
            self.assertEqual(got["number"], n)
            self.assertEqual(got["name"], r.ROIName)
            self.same_str(got["type"], types.get(n), "ROI type of %s" % r.ROIName)
            c = contours.get(n)
            seq = getattr(c, "ContourSequence", []) if c is not None else []
            self.assertEqual(got["contours"], len(seq), r.ROIName)
            self.assertEqual(got["points"], sum(int(x.NumberOfContourPoints) for x in seq),
                             r.ROIName)
            self.assertEqual(sum(got["contour_types"].values()), len(seq))
            if c is not None and "ROIDisplayColor" in c:
                self.assertEqual(got["color_rgb"], [int(v) for v in c.ROIDisplayColor])
            zs = [float(v) for x in seq for v in x.ContourData[2::3]]
            if zs:
                self.close(got["z_min_cm"], min(zs) / 10, "z min")
                self.close(got["z_max_cm"], max(zs) / 10, "z max")


class DemoCases(Compare):
    def test_demo_cases_match_pydicom(self):
        for case in CASES:
            plan = os.path.join(SOURCE_ROOT, "examples", case, "rtplan.dcm")
            ss = os.path.join(SOURCE_ROOT, "examples", case, "rtstruct.dcm")
            js = run_json("inspect", "--format", "json", plan, ss)
            self.assertEqual(len(js["files"]), 2)
            self.check_plan(js["files"][0], plan)
            self.check_structures(js["files"][1], ss)

    def test_every_transfer_syntax_and_no_meta_header(self):
        """Explicit/implicit little endian, explicit big endian, no meta header:
        the same values each time (DCMTK reads them all; pydicom wrote them)."""
        src_plan = os.path.join(SOURCE_ROOT, "examples", "face-lens", "rtplan.dcm")
        src_ss = os.path.join(SOURCE_ROOT, "examples", "face-lens", "rtstruct.dcm")
        with tempdir() as d:
            for syntax in ("explicit_le", "implicit_le", "explicit_be"):
                for meta in (True, False):
                    if syntax == "explicit_be" and not meta:
                        continue  # pydicom cannot mark a bare big-endian data set
                    tag = "%s_%s" % (syntax, "meta" if meta else "bare")
                    for src, kind in ((src_plan, "plan"), (src_ss, "ss")):
                        ds = pydicom.dcmread(src)
                        out = os.path.join(d, "%s_%s.dcm" % (kind, tag))
                        rb.save(ds, out, syntax=syntax, meta=meta)
                        js = run_json("inspect", "--format", "json", out)["files"][0]
                        if kind == "plan":
                            self.check_plan(js, out)
                        else:
                            self.check_structures(js, out)

    def test_options_may_follow_the_files(self):
        plan = os.path.join(SOURCE_ROOT, "examples", "face-lens", "rtplan.dcm")
        a = run_json("inspect", plan, "--format", "json")
        b = run_json("inspect", "-f", "json", plan)
        self.assertEqual(a, b)

    def test_text_summary_names_units_and_skipped_beams(self):
        plan = os.path.join(SOURCE_ROOT, "examples", "face-lens", "rtplan.dcm")
        rc, out, err = run("inspect", plan, check=0)
        self.assertIn("energy 9.0 MeV", out)
        self.assertIn("SSD 100.0 cm", out)
        self.assertIn("gantry 45.0 deg", out)
        self.assertIn("skipped: not an electron beam", out)
        self.assertIn("350.0 MU per fraction, 15 fractions", out)

    @unittest.skipUnless(shutil.which("dciodvfy"), "dciodvfy (dicom3tools) not installed")
    def test_demo_files_are_valid_for_their_iod(self):
        """dciodvfy (Debian dicom3tools) checks each file against its IOD."""
        for case in CASES:
            for f in ("rtplan.dcm", "rtstruct.dcm"):
                path = os.path.join(SOURCE_ROOT, "examples", case, f)
                p = subprocess.run(["dciodvfy", path], capture_output=True, text=True)
                errors = [l for l in (p.stdout + p.stderr).splitlines() if l.startswith("Error")]
                self.assertEqual(errors, [], path)

    def same_dataset(self, a, b, where):
        """Every element the same, but decimal strings (DS) equal as numbers
        within 1e-6 (mm, degrees): the generator's trigonometry comes from
        numpy, whose vectorised sine and cosine differ by a few units in the
        last place between processors (AVX-512 or not), and a coordinate's
        shortest repr then takes another form (rtbuild._ds_number)."""
        self.assertEqual([e.tag for e in a], [e.tag for e in b], where)
        for ea, eb in zip(a, b):
            w = "%s %s" % (where, ea.tag)
            if ea.VR == "SQ":
                self.assertEqual(len(ea.value), len(eb.value), w)
                for k, (ia, ib) in enumerate(zip(ea.value, eb.value)):
                    self.same_dataset(ia, ib, "%s[%d]" % (w, k))
            elif ea.VR == "DS" and ea.value is not None and eb.value is not None:
                va = list(ea.value) if ea.VM > 1 else [ea.value]
                vb = list(eb.value) if eb.VM > 1 else [eb.value]
                self.assertEqual(len(va), len(vb), w)
                for x, y in zip(va, vb):
                    self.assertLessEqual(abs(float(x) - float(y)), 1e-6, w)
            else:
                self.assertEqual(ea.value, eb.value, w)

    def test_generator_reproduces_the_shipped_files(self):
        with tempdir() as d:
            subprocess.run(["/usr/bin/python3",
                            os.path.join(SOURCE_ROOT, "examples", "generator", "make_cases.py"), d],
                           check=True)
            for case in CASES:
                for f in ("rtplan.dcm", "rtstruct.dcm"):
                    got, shipped = os.path.join(d, case, f), os.path.join(SOURCE_ROOT, "examples",
                                                                         case, f)
                    with open(got, "rb") as a, open(shipped, "rb") as b:
                        if a.read() == b.read():
                            continue
                    ga, sb = pydicom.dcmread(got), pydicom.dcmread(shipped)
                    self.same_dataset(ga.file_meta, sb.file_meta, "%s/%s meta" % (case, f))
                    self.same_dataset(ga, sb, "%s/%s" % (case, f))


class PydicomSamples(Compare):
    """Real sample files shipped in Debian's python3-pydicom."""

    def test_photon_plan_is_refused(self):
        rc, out, err = run("inspect", os.path.join(PYDICOM_TEST_FILES, "rtplan.dcm"))
        self.assertEqual(rc, 3)
        self.assertIn("no electron beams: photon plans are not handled", err)
        self.assertEqual(len(err.strip().splitlines()), 1)
        self.assertEqual(out, "")

    def test_truncated_plan_is_a_clean_input_error(self):
        path = os.path.join(PYDICOM_TEST_FILES, "rtplan_truncated.dcm")
        rc, out, err = run("inspect", path)
        self.assertEqual(rc, 3)
        self.assertIn("rtplan_truncated.dcm", err)
        self.assertIn("truncated", err)
        self.assertEqual(len(err.strip().splitlines()), 1)

    def test_rtstruct_sample_names_and_counts(self):
        path = os.path.join(PYDICOM_TEST_FILES, "rtstruct.dcm")
        js = run_json("inspect", "--format", "json", path)["files"][0]
        self.check_structures(js, path)
        d = pydicom.dcmread(path, force=True)  # the sample has no meta header
        names = [r.ROIName for r in d.StructureSetROISequence]
        self.assertEqual([r["name"] for r in js["rois"]], names)


if __name__ == "__main__":
    unittest.main()
