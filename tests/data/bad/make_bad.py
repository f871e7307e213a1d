#!/usr/bin/python3
"""Make the bad-input corpus of tests/data/bad/ and its table cases.tsv.

Each file is a small, deliberately broken input (invented demo data) with
the exit code and a fragment of the one-line message that strayline must
give for it. The table is read by tests/reference/test_bad_input.py; the
files are committed so that the fuzzers can seed from them too.

Columns of cases.tsv: file, arguments ({f} is the file, {ss} the good
structure set, {plan} the good plan, {model} the demo model), exit code,
message fragment.

Run: /usr/bin/python3 tests/data/bad/make_bad.py   (rewrites this folder)
"""
import os
import sys

HERE = os.path.dirname(os.path.abspath(__file__))
sys.path.insert(0, os.path.join(HERE, "..", "..", "..", "examples", "generator"))
import rtbuild as rb  # noqa: E402
from pydicom.datadict import tag_for_keyword  # noqa: E402
from pydicom.dataelem import RawDataElement  # noqa: E402

PATIENT = {"name": "DEMO^BADINPUT", "id": "DEMO-BAD-00"}
FRAME = rb.uid("bad", "frame")
rows = []


def base_structures():
    rois = [
        {"number": 1, "name": "BODY", "type": "EXTERNAL",
         "contours": rb.box(-150, 150, -100, 100, -150, 150, 10)},
        {"number": 2, "name": "Lens_L", "type": "ORGAN",
         "contours": rb.ellipsoid((30, -90, 60), (4.5, 2, 4.5), 2.5, n=24)},
        {"number": 3, "name": "Device", "type": "AVOIDANCE", "contours": rb.point(60, -90, -80)},
    ]
    return rb.structure_dataset(PATIENT, label="BAD_BASE", rois=rois, frame_uid=FRAME, seed="bad-ss")


SS = base_structures()


def base_plan(**beam_changes):
    beam = {"number": 1, "name": "E09", "energy_mev": 9.0, "gantry": 0.0, "collimator": 0.0,
            "couch": 0.0, "iso_mm": [0.0, -100.0, 0.0], "ssd_mm": 1000.0,
            "applicator": {"id": "A10", "type": "ELECTRON_SQUARE"},
            "blocks": [{"points_mm": rb.square_cutout(40.0)}], "setup": 1, "mu": 200.0}
    beam.update(beam_changes)
    return rb.plan_dataset(PATIENT, label="BAD_BASE", frame_uid=FRAME,
                           structure_set_uid=SS.SOPInstanceUID, beams=[beam],
                           dose_refs=[{"prescription_gy": 10.0}], seed="bad-plan")


def save(name, ds, args, code, fragment, syntax="explicit_le"):
    rb.save(ds, os.path.join(HERE, name), syntax=syntax)
    rows.append((name, args, code, fragment))


def raw(name, data, args, code, fragment):
    with open(os.path.join(HERE, name), "wb") as f:
        f.write(data)
    rows.append((name, args, code, fragment))


def plan_case(name, mutate, fragment, code=3, args="inspect {f}"):
    ds = base_plan()
    mutate(ds)
    save(name, ds, args, code, fragment)


def ss_case(name, mutate, fragment, code=3, args="inspect {f}"):
    ds = base_structures()
    mutate(ds)
    save(name, ds, args, code, fragment)


def beam(ds):
    return ds.BeamSequence[0]


def cp0(ds):
    return ds.BeamSequence[0].ControlPointSequence[0]


def delete(item, keyword):
    delattr(item, keyword)


def raw_ds(item, keyword, text):
    """Put a DS element with arbitrary text: pydicom validates what is
    assigned normally, and these files must carry values it would refuse."""
    tag = tag_for_keyword(keyword)
    value = text.encode("ascii")
    if len(value) % 2:
        value += b" "
    item._dict[tag] = RawDataElement(tag, "DS", len(value), value, 0, False, True)


def main():
    for f in os.listdir(HERE):
        if f.endswith(".dcm") or f.endswith(".txt") or f == "cases.tsv":
            os.remove(os.path.join(HERE, f))
    # the good pair the table refers to
    rb.save(SS, os.path.join(HERE, "good_rtstruct.dcm"))
    good = base_plan()
    rb.save(good, os.path.join(HERE, "good_rtplan.dcm"))
    good_bytes = open(os.path.join(HERE, "good_rtplan.dcm"), "rb").read()

    # -- not DICOM, empty, truncated
    raw("not_dicom.txt", b"Patient: nobody\nThis is a text file, not DICOM.\n" * 20,
        "inspect {f}", 3, "cannot read as DICOM")
    raw("empty.dcm", b"", "inspect {f}", 3, "empty file")
    raw("truncated_in_preamble.dcm", good_bytes[:100], "inspect {f}", 3, "cannot read as DICOM")
    raw("truncated_in_meta.dcm", good_bytes[:200], "inspect {f}", 3, "cannot read as DICOM")
    raw("truncated_half.dcm", good_bytes[:len(good_bytes) // 2], "inspect {f}", 3,
        "cannot read as DICOM")
    raw("truncated_last_byte.dcm", good_bytes[:-1], "inspect {f}", 3, "cannot read as DICOM")

    # -- other kinds of object
    ct = rb.plan_dataset(PATIENT, label="X", beams=[], seed="bad-ct")
    ct.SOPClassUID = "1.2.840.10008.5.1.4.1.1.2"
    ct.file_meta.MediaStorageSOPClassUID = ct.SOPClassUID
    ct.Modality = "CT"
    save("wrong_iod_ct_image.dcm", ct, "inspect {f}", 3, "CTImageStorage")
    dose = rb.plan_dataset(PATIENT, label="X", beams=[], seed="bad-dose")
    dose.SOPClassUID = "1.2.840.10008.5.1.4.1.1.481.2"
    dose.file_meta.MediaStorageSOPClassUID = dose.SOPClassUID
    dose.Modality = "RTDOSE"
    save("wrong_iod_rt_dose.dcm", dose, "inspect {f}", 3, "RTDoseStorage")
    plan_case("wrong_modality.dcm", lambda d: setattr(d, "Modality", "CT"),
              "Modality (0008,0060): 'CT' contradicts")
    ion = base_plan()
    ion.SOPClassUID = "1.2.840.10008.5.1.4.1.1.481.8"
    save("rt_ion_plan.dcm", ion, "inspect {f}", 3, "ion plans are not handled")
    photon = rb.plan_dataset(PATIENT, label="PHOTON", frame_uid=FRAME, seed="bad-photon",
                             beams=[{"number": 1, "radiation_type": "PHOTON", "energy_mev": 6.0,
                                     "iso_mm": [0, 0, 0], "setup": 1}])
    save("photon_plan.dcm", photon, "inspect {f}", 3,
         "no electron beams: photon plans are not handled")
    plan_case("no_beam_sequence.dcm", lambda d: delete(d, "BeamSequence"),
              "no electron beams: photon plans are not handled")

    # -- missing mandatory elements, level by level
    plan_case("missing_sop_instance_uid.dcm", lambda d: delete(d, "SOPInstanceUID"),
              "SOPInstanceUID (0008,0018): missing")
    plan_case("missing_sop_class_uid.dcm", lambda d: delete(d, "SOPClassUID"),
              "SOPClassUID (0008,0016): missing")
    plan_case("missing_fraction_groups.dcm", lambda d: delete(d, "FractionGroupSequence"),
              "FractionGroupSequence (300A,0070): missing")
    plan_case("missing_beam_number.dcm", lambda d: delete(beam(d), "BeamNumber"),
              "beam item 1 > BeamNumber (300A,00C0): missing")
    plan_case("missing_radiation_type.dcm", lambda d: delete(beam(d), "RadiationType"),
              "beam 1 > RadiationType (300A,00C6): missing")
    plan_case("missing_control_points.dcm", lambda d: delete(beam(d), "ControlPointSequence"),
              "beam 1 > ControlPointSequence (300A,0111): missing")
    plan_case("missing_energy.dcm", lambda d: delete(cp0(d), "NominalBeamEnergy"),
              "beam 1 > control point 0 > NominalBeamEnergy (300A,0114): missing")
    plan_case("missing_gantry_angle.dcm", lambda d: delete(cp0(d), "GantryAngle"),
              "beam 1 > control point 0 > GantryAngle (300A,011E): missing")
    plan_case("missing_isocenter.dcm", lambda d: delete(cp0(d), "IsocenterPosition"),
              "beam 1 > control point 0 > IsocenterPosition (300A,012C): missing")
    plan_case("missing_patient_position.dcm",
              lambda d: delete(d.PatientSetupSequence[0], "PatientPosition"),
              "PatientPosition (0018,5100): missing")
    plan_case("missing_block_data.dcm", lambda d: delete(beam(d).BlockSequence[0], "BlockData"),
              "block item 1 > BlockData (300A,0106): missing")
    plan_case("missing_applicator_id.dcm",
              lambda d: delete(beam(d).ApplicatorSequence[0], "ApplicatorID"),
              "applicator > ApplicatorID (300A,0108): missing")

    # -- counts that disagree
    plan_case("block_points_mismatch.dcm",
              lambda d: setattr(beam(d).BlockSequence[0], "BlockNumberOfPoints", 5),
              "BlockNumberOfPoints (300A,0104): says 5 points but Block Data holds 4")
    def odd_block(d):
        b = beam(d).BlockSequence[0]
        b.BlockData = list(b.BlockData) + ["1.0"]
    plan_case("block_data_odd_count.dcm", odd_block, "not a whole number of (x,y) pairs")
    plan_case("number_of_blocks_mismatch.dcm", lambda d: setattr(beam(d), "NumberOfBlocks", 2),
              "NumberOfBlocks (300A,00F0): says 2 but the Block Sequence holds 1")
    plan_case("control_point_count_mismatch.dcm",
              lambda d: setattr(beam(d), "NumberOfControlPoints", 3),
              "NumberOfControlPoints (300A,0110): says 3")
    plan_case("fraction_beam_count_mismatch.dcm",
              lambda d: setattr(d.FractionGroupSequence[0], "NumberOfBeams", 2),
              "NumberOfBeams (300A,0080): says 2")
    plan_case("block_two_points.dcm", lambda d: (
        setattr(beam(d).BlockSequence[0], "BlockData", rb.ds([-10, -10, 10, 10])),
        setattr(beam(d).BlockSequence[0], "BlockNumberOfPoints", 2)),
        "needs at least 3 points, found 2")

    # -- non-finite and absurd numbers
    plan_case("negative_energy.dcm", lambda d: setattr(cp0(d), "NominalBeamEnergy", "-9"),
              "NominalBeamEnergy (300A,0114): -9.000000 MeV is not a plausible beam energy")
    plan_case("energy_not_a_number.dcm", lambda d: raw_ds(cp0(d), "NominalBeamEnergy", "nine"),
              "NominalBeamEnergy (300A,0114): not a valid decimal string")
    plan_case("ssd_zero.dcm", lambda d: setattr(cp0(d), "SourceToSurfaceDistance", "0"),
              "SourceToSurfaceDistance (300A,0130): 0.000000 mm is not a plausible")
    plan_case("ssd_negative.dcm", lambda d: setattr(cp0(d), "SourceToSurfaceDistance", "-1000"),
              "is not a plausible source-surface distance")
    plan_case("ssd_nan.dcm", lambda d: raw_ds(cp0(d), "SourceToSurfaceDistance", "NaN"),
              "SourceToSurfaceDistance (300A,0130): value is not a finite number")
    plan_case("gantry_400.dcm", lambda d: setattr(cp0(d), "GantryAngle", "400"),
              "GantryAngle (300A,011E): angle 400.000000 deg is outside 0..360")
    plan_case("sad_absurd.dcm", lambda d: setattr(beam(d), "SourceAxisDistance", "5"),
              "SourceAxisDistance (300A,00B4): 5.000000 mm is not a plausible")
    plan_case("meterset_negative.dcm",
              lambda d: setattr(d.FractionGroupSequence[0].ReferencedBeamSequence[0],
                                "BeamMeterset", "-200"),
              "BeamMeterset (300A,0086): -200.000000 MU is not a plausible meterset")
    plan_case("isocenter_absurd.dcm", lambda d: setattr(cp0(d), "IsocenterPosition",
                                                       rb.ds([0, 1e9, 0])),
              "IsocenterPosition (300A,012C): coordinate")
    plan_case("isocenter_two_values.dcm", lambda d: setattr(cp0(d), "IsocenterPosition",
                                                           rb.ds([0, 1])),
              "IsocenterPosition (300A,012C): expected 3 values, found 2")
    plan_case("fractions_zero.dcm",
              lambda d: setattr(d.FractionGroupSequence[0], "NumberOfFractionsPlanned", 0),
              "NumberOfFractionsPlanned (300A,0078): 0 is not a plausible number of fractions")

    # -- beams strayline does not handle, positions it does not know
    plan_case("dynamic_electron_beam.dcm", lambda d: setattr(beam(d), "BeamType", "DYNAMIC"),
              "moving electron beams are not handled")
    plan_case("unknown_patient_position.dcm",
              lambda d: setattr(d.PatientSetupSequence[0], "PatientPosition", "SITTING"),
              "unsupported patient position 'SITTING'")
    plan_case("unknown_block_type.dcm", lambda d: setattr(beam(d).BlockSequence[0], "BlockType",
                                                         "WEDGE"),
              "unknown block type 'WEDGE'")

    # -- numbers that clash
    def dup_beam(d):
        d.BeamSequence.append(base_plan().BeamSequence[0])
    plan_case("duplicate_beam_number.dcm", dup_beam, "duplicate beam number 1")
    plan_case("missing_referenced_beam.dcm",
              lambda d: setattr(d.FractionGroupSequence[0].ReferencedBeamSequence[0],
                                "ReferencedBeamNumber", 7),
              "ReferencedBeamNumber (300C,0006) 7: no such beam")
    plan_case("missing_referenced_setup.dcm",
              lambda d: setattr(beam(d), "ReferencedPatientSetupNumber", 4),
              "ReferencedPatientSetupNumber (300C,006A) 4: no such patient setup")

    # -- structure sets
    ss_case("ss_missing_roi_sequence.dcm", lambda d: delete(d, "StructureSetROISequence"),
            "StructureSetROISequence (3006,0020): missing")
    ss_case("ss_missing_roi_name.dcm",
            lambda d: setattr(d.StructureSetROISequence[1], "ROIName", ""),
            "ROI 2 > ROIName (3006,0026): missing")
    def dup_roi(d):
        d.StructureSetROISequence[2].ROINumber = 2
    ss_case("ss_duplicate_roi_number.dcm", dup_roi, "duplicate ROI number 2")
    ss_case("ss_contour_count_mismatch.dcm",
            lambda d: setattr(d.ROIContourSequence[1].ContourSequence[0],
                              "NumberOfContourPoints", 30),
            "NumberOfContourPoints (3006,0046): says 30 points but Contour Data holds 24")
    def not_triples(d):
        c = d.ROIContourSequence[1].ContourSequence[0]
        c.ContourData = list(c.ContourData)[:-1]
    ss_case("ss_contour_not_triples.dcm", not_triples, "not a whole number of (x,y,z) triples")
    ss_case("ss_missing_contour_data.dcm",
            lambda d: delete(d.ROIContourSequence[1].ContourSequence[0], "ContourData"),
            "ContourData (3006,0050): missing")
    ss_case("ss_unknown_contour_type.dcm",
            lambda d: setattr(d.ROIContourSequence[1].ContourSequence[0],
                              "ContourGeometricType", "SPLINE"),
            "unknown contour type 'SPLINE'")
    ss_case("ss_contour_nan.dcm",
            lambda d: raw_ds(d.ROIContourSequence[1].ContourSequence[0], "ContourData",
                             "\\".join(["NaN"] + [str(v) for v in
                                                  d.ROIContourSequence[1].ContourSequence[0].ContourData[1:]])),
            "ContourData (3006,0050): value is not a finite number")

    def contour_points(n):
        def mutate(d):
            c = d.ROIContourSequence[1].ContourSequence[0]
            c.ContourData = rb.ds([v for i in range(n) for v in (30.0 + i, -90.0, 60.0)])
            c.NumberOfContourPoints = n
        return mutate
    ss_case("ss_contour_one_point.dcm", contour_points(1),
            "a CLOSED_PLANAR contour needs at least 3 points, found 1")
    ss_case("ss_contour_two_points.dcm", contour_points(2),
            "a CLOSED_PLANAR contour needs at least 3 points, found 2")
    ss_case("ss_contour_zero_points.dcm", contour_points(0), "ContourData (3006,0050): missing")
    ss_case("ss_roi_contour_unknown_roi.dcm",
            lambda d: setattr(d.ROIContourSequence[1], "ReferencedROINumber", 99),
            "refers to ROI 99")
    def two_external(d):
        d.RTROIObservationsSequence[1].RTROIInterpretedType = "EXTERNAL"
    ss_case("ss_two_external.dcm", two_external, "two ROIs are typed EXTERNAL")
    ss_case("ss_wrong_modality.dcm", lambda d: setattr(d, "Modality", "RTPLAN"),
            "contradicts the SOP Class (RT Structure Set)")

    with open(os.path.join(HERE, "cases.tsv"), "w") as f:
        f.write("# file\targuments\texit\tmessage fragment\n")
        for r in rows:
            f.write("%s\t%s\t%d\t%s\n" % r)
    print("%d bad inputs written" % len(rows))


if __name__ == "__main__":
    main()
