#!/usr/bin/python3
"""Make the bad-input corpus of tests/data/bad/ and its table cases.tsv.

Each file is a small, deliberately broken input (invented demo data) with
the exit code and a fragment of the one-line message that strayline must
give for it. The table is read by tests/reference/test_bad_input.py; the
files are committed so that the fuzzers can seed from them too.

Columns of cases.tsv: file, arguments ({f} is the file, {ss} the good
structure set, {plan} the good plan, {model} the demo model, {tmp} a
scratch folder), exit code, message fragment.

Run: /usr/bin/python3 tests/data/bad/make_bad.py   (rewrites this folder)
"""
import copy
import math
import os
import sys

import yaml

HERE = os.path.dirname(os.path.abspath(__file__))
sys.path.insert(0, os.path.join(HERE, "..", "..", "..", "examples", "generator"))
import rtbuild as rb  # noqa: E402
from pydicom.datadict import tag_for_keyword  # noqa: E402
from pydicom.dataelem import RawDataElement  # noqa: E402
from pydicom.sequence import Sequence  # noqa: E402

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


def raw_ds(item, keyword, text, vr="DS"):
    """Put a DS (or IS) element with arbitrary text: pydicom validates what is
    assigned normally, and these files must carry values it would refuse."""
    tag = tag_for_keyword(keyword)
    value = text.encode("ascii")
    if len(value) % 2:
        value += b" "
    item._dict[tag] = RawDataElement(tag, vr, len(value), value, 0, False, True)


def nested_sequences(depth, big_endian_items=False, deflated=False):
    """A small file (explicit VR little endian) whose data set holds `depth`
    nested undefined-length sequences: bytes written directly, as pydicom's
    writer recurses per level. With big_endian_items the item tags are
    written in the other byte order (DCMTK reads them as items too), so that
    the reader's guard counts both byte orders."""
    import struct

    def el(g, e, vr, val):
        if vr in (b"OB", b"SQ"):
            return struct.pack("<HH2sHI", g, e, vr, 0, len(val)) + val
        return struct.pack("<HH2sH", g, e, vr, len(val)) + val
    meta_body = (el(2, 1, b"OB", b"\0\1") +
                 el(2, 2, b"UI", b"1.2.840.10008.5.1.4.1.1.481.5\0") +
                 el(2, 3, b"UI", b"1.2.826.0.1.3680043.2.1125.9\0") +
                 el(2, 0x10, b"UI", b"1.2.840.10008.1.2.1.99" if deflated
                    else b"1.2.840.10008.1.2.1\0"))
    meta = el(2, 0, b"UL", struct.pack("<I", len(meta_body))) + meta_body
    body = (el(8, 0x16, b"UI", b"1.2.840.10008.5.1.4.1.1.481.5\0") +
            el(8, 0x18, b"UI", b"1.2.826.0.1.3680043.2.1125.9\0") + el(8, 0x60, b"CS", b"RTPLAN"))
    item = struct.pack(">HHI" if big_endian_items else "<HHI", 0xFFFE, 0xE000, 0xFFFFFFFF)
    opening = struct.pack("<HH2sHI", 0x300C, 0x0002, b"SQ", 0, 0xFFFFFFFF) + item
    closing = struct.pack("<HHI", 0xFFFE, 0xE00D, 0) + struct.pack("<HHI", 0xFFFE, 0xE0DD, 0)
    data = body + opening * depth + closing * depth
    if deflated:
        import zlib
        c = zlib.compressobj(9, zlib.DEFLATED, -15)
        data = c.compress(data) + c.flush()
        if len(data) % 2:
            data += b"\0"
    return b"\0" * 128 + b"DICM" + meta + data


def main():
    for f in os.listdir(HERE):
        if f.endswith((".dcm", ".txt", ".yaml")) or f == "cases.tsv":
            os.remove(os.path.join(HERE, f))
    # the good pair the table refers to
    rb.save(SS, os.path.join(HERE, "good_rtstruct.dcm"))
    good = base_plan()
    rb.save(good, os.path.join(HERE, "good_rtplan.dcm"))
    good_bytes = open(os.path.join(HERE, "good_rtplan.dcm"), "rb").read()

    # -- not DICOM, empty, truncated
    raw("not_dicom.txt", b"Patient: nobody\nThis is a text file, not DICOM.\n" * 20,
        "inspect {f}", 3, "not a DICOM file")
    raw("empty.dcm", b"", "inspect {f}", 3, "empty file")
    # -- pathological nesting: refused after a read on a stack sized for it
    for depth, name in ((65, "nested_65.dcm"), (10000, "nested_10000.dcm"),
                        (30000, "nested_30000.dcm")):
        raw(name, nested_sequences(depth), "inspect {f}", 3,
            "sequences nested more than 64 levels deep")
    # deflated: the item tags are counted in the inflated stream (zlib)
    raw("nested_30000_deflated.dcm", nested_sequences(30000, deflated=True), "inspect {f}", 3,
        "sequences nested more than 64 levels deep")
    # item tags of the other byte order are counted too; DCMTK then refuses the
    # stream cleanly
    raw("nested_20000_big_endian_items.dcm", nested_sequences(20000, big_endian_items=True),
        "inspect {f}", 3, "cannot read as DICOM")
    raw("truncated_in_preamble.dcm", good_bytes[:100], "inspect {f}", 3, "not a DICOM file")
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
    # -- a static electron beam whose later control point moves or changes
    def second_cp(d, **kw):
        import copy as _copy
        b = beam(d)
        cp1 = _copy.deepcopy(b.ControlPointSequence[-1])
        cp1.ControlPointIndex = len(b.ControlPointSequence)
        for k, v in kw.items():
            setattr(cp1, k, v)
        b.ControlPointSequence.append(cp1)
        b.NumberOfControlPoints = len(b.ControlPointSequence)
    for name, kw, frag in (
            ("cp_gantry_moves.dcm", {"GantryAngle": "60"}, "GantryAngle (300A,011E): 60"),
            ("cp_energy_changes.dcm", {"NominalBeamEnergy": "12"},
             "NominalBeamEnergy (300A,0114): 12"),
            ("cp_collimator_turns.dcm", {"BeamLimitingDeviceAngle": "90"},
             "BeamLimitingDeviceAngle (300A,0120): 90"),
            ("cp_couch_turns.dcm", {"PatientSupportAngle": "10"},
             "PatientSupportAngle (300A,0122): 10"),
            ("cp_isocentre_moves.dcm", {"IsocenterPosition": ["0", "0", "50"]},
             "IsocenterPosition (300A,012C): differs from control point 0")):
        plan_case(name, lambda d, kw=kw: second_cp(d, **kw), frag)
    # -- an organ whose coordinates put it kilometres away: no number for it
    def far_away(d):
        for c in d.ROIContourSequence[1].ContourSequence:
            c.ContourData = [v + 4.0e4 if i % 3 == 0 else v for i, v in enumerate(c.ContourData)]
    ss_case("ss_organ_far_away.dcm", far_away, "lies more than 500 cm from a field edge",
            args="estimate {plan} {f} --model {model}")

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
              "NominalBeamEnergy (300A,0114): value 1 'nine' is not a decimal string")
    # -- IS and DS read whole and strictly (PS3.5 6.2): a value that only
    #    starts like a number is refused, never cut to its valid beginning
    def fg(d):
        return d.FractionGroupSequence[0]

    def rbeam(d):
        return d.FractionGroupSequence[0].ReferencedBeamSequence[0]
    strict_is = [
        ("is_fractions_exponent.dcm", fg, "NumberOfFractionsPlanned", "1e2"),
        ("is_fractions_decimal.dcm", fg, "NumberOfFractionsPlanned", "15.0"),
        ("is_fractions_two_words.dcm", fg, "NumberOfFractionsPlanned", "1 5"),
        ("is_fractions_trailing_text.dcm", fg, "NumberOfFractionsPlanned", "15x"),
        ("is_fractions_sign_only.dcm", fg, "NumberOfFractionsPlanned", "+"),
        ("is_beam_number_beyond_32_bits.dcm", rbeam, "ReferencedBeamNumber", "4294967297"),
        ("is_beam_number_too_long.dcm", rbeam, "ReferencedBeamNumber", "1234567890123"),
        ("is_beam_number_hex.dcm", beam, "BeamNumber", "0x1"),
    ]
    for name, where, kw, text in strict_is:
        plan_case(name, lambda d, w=where, k=kw, t=text: raw_ds(w(d), k, t, vr="IS"),
                  "value 1 '%s' is not an integer string" % text)
    strict_ds = [
        ("ds_meterset_two_words.dcm", rbeam, "BeamMeterset", "3 50"),
        ("ds_energy_trailing_text.dcm", cp0, "NominalBeamEnergy", "15x"),
        ("ds_gantry_unit.dcm", cp0, "GantryAngle", "45deg"),
        ("ds_ssd_decimal_comma.dcm", cp0, "SourceToSurfaceDistance", "1000,5"),
        ("ds_ssd_exponent_without_digits.dcm", cp0, "SourceToSurfaceDistance", "1e"),
        ("ds_ssd_two_points.dcm", cp0, "SourceToSurfaceDistance", "10.0.5"),
        ("ds_ssd_double_sign.dcm", cp0, "SourceToSurfaceDistance", "--1000"),
        ("ds_ssd_point_only.dcm", cp0, "SourceToSurfaceDistance", "."),
        ("ds_ssd_infinity.dcm", cp0, "SourceToSurfaceDistance", "inf"),
        ("ds_ssd_hex.dcm", cp0, "SourceToSurfaceDistance", "0x3E8"),
        ("ds_sad_inner_space.dcm", beam, "SourceAxisDistance", "10 00"),
    ]
    for name, where, kw, text in strict_ds:
        plan_case(name, lambda d, w=where, k=kw, t=text: raw_ds(w(d), k, t),
                  "value 1 '%s' is not a decimal string" % text)
    plan_case("ds_meterset_second_value_bad.dcm",
              lambda d: raw_ds(rbeam(d), "BeamMeterset", "200\\2x"),
              "value 2 '2x' is not a decimal string")
    ss_case("ds_contour_decimal_comma.dcm",
            lambda d: raw_ds(d.ROIContourSequence[1].ContourSequence[0], "ContourData",
                             "\\".join(["1,5"] + [str(v) for v in
                                                  d.ROIContourSequence[1].ContourSequence[0].ContourData[1:]])),
            "value 1 '1,5' is not a decimal string")

    plan_case("ssd_zero.dcm", lambda d: setattr(cp0(d), "SourceToSurfaceDistance", "0"),
              "SourceToSurfaceDistance (300A,0130): 0.000000 mm is not a plausible")
    plan_case("ssd_negative.dcm", lambda d: setattr(cp0(d), "SourceToSurfaceDistance", "-1000"),
              "is not a plausible source-surface distance")
    plan_case("ssd_nan.dcm", lambda d: raw_ds(cp0(d), "SourceToSurfaceDistance", "NaN"),
              "SourceToSurfaceDistance (300A,0130): value 1 'NaN' is not a decimal string")
    plan_case("gantry_400.dcm", lambda d: setattr(cp0(d), "GantryAngle", "400"),
              "GantryAngle (300A,011E): angle 400.000000 deg is outside 0..360")
    plan_case("sad_absurd.dcm", lambda d: setattr(beam(d), "SourceAxisDistance", "5"),
              "SourceAxisDistance (300A,00B4): 5.000000 mm is not a plausible")
    plan_case("meterset_negative.dcm",
              lambda d: setattr(d.FractionGroupSequence[0].ReferencedBeamSequence[0],
                                "BeamMeterset", "-200"),
              "BeamMeterset (300A,0086): -200.000000 MU is not a plausible meterset")
    # a meterset in minutes would be read as monitor units
    plan_case("dosimeter_unit_minute.dcm",
              lambda d: setattr(beam(d), "PrimaryDosimeterUnit", "MINUTE"),
              "PrimaryDosimeterUnit (300A,00B3): 'MINUTE': strayline reads an electron beam's "
              "meterset as monitor units")
    # a Radiation Type in lower case (PS3.5 6.2: a code string is upper
    # case) was taken for another kind of beam and listed as one
    plan_case("radiation_type_lowercase.dcm",
              lambda d: setattr(beam(d), "RadiationType", "electron"),
              "RadiationType (300A,00C6): 'electron' is not a Radiation Type: a code string "
              "is upper case (ELECTRON)")
    # a treatment beam of 0 MU would read 0 cGy at every organ and pass
    # them all (found by an independent review): the MU are unknown
    plan_case("meterset_zero.dcm",
              lambda d: setattr(d.FractionGroupSequence[0].ReferencedBeamSequence[0],
                                "BeamMeterset", "0"),
              "BeamMeterset (300A,0086) 0 MU for an electron treatment beam, below 1 MU",
              args="estimate {f} {ss} --model {model}")
    plan_case("meterset_placeholder.dcm",
              lambda d: setattr(d.FractionGroupSequence[0].ReferencedBeamSequence[0],
                                "BeamMeterset", "0.0001"),
              "BeamMeterset (300A,0086) 0.0001 MU for an electron treatment beam, below 1 MU",
              args="estimate {f} {ss} --model {model}")
    # a setup beam given monitor units would be skipped with its dose
    # (found by an independent review)
    plan_case("setup_beam_with_mu.dcm",
              lambda d: setattr(beam(d), "TreatmentDeliveryType", "SETUP"),
              "is an electron beam of Treatment Delivery Type (300A,00CE) SETUP, yet fraction "
              "group 1 gives it BeamMeterset (300A,0086)")
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

    # -- geometry that cannot be placed, a pair that does not belong together
    plan_case("cutout_self_intersecting.dcm",
              lambda d: setattr(beam(d).BlockSequence[0], "BlockData",
                                rb.ds([-40, -40, 40, 40, 40, -40, -40, 30])),
              "crosses itself", args="locate {f} {ss}")
    other = base_structures()
    other.SOPInstanceUID = rb.uid("bad", "other-ss")
    save("ss_of_another_plan.dcm", other, "locate {plan} {f}", 3, "do not belong together")
    plan_case("plan_frame_mismatch.dcm",
              lambda d: setattr(d, "FrameOfReferenceUID", rb.uid("bad", "other-frame")),
              "differs from", args="locate {f} {ss}")

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
            "ContourData (3006,0050): value 1 'NaN' is not a decimal string")

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
    def only_collinear(d):
        contour_points(3)(d)
        seq = d.ROIContourSequence[1].ContourSequence
        d.ROIContourSequence[1].ContourSequence = Sequence([seq[0]])
    ss_case("ss_contour_collinear.dcm", only_collinear,
            "ROI 'Lens_L': contour 1 (z = 6.00 cm) is closed but encloses no area",
            args="locate {plan} {f}")
    plan_case("plan_ssd_implausible.dcm",
              lambda d: setattr(cp0(d), "SourceToSurfaceDistance", "10"),
              "SSD 1.0 cm (SourceToSurfaceDistance (300A,0130)) is outside 95-130 cm",
              args="estimate {f} {ss} --model {model}")
    plan_case("plan_no_ssd_depth_option.dcm", lambda d: delete(cp0(d), "SourceToSurfaceDistance"),
              "no SSD (no SourceToSurfaceDistance (300A,0130) in the plan, and the body contour "
              "is not used)", args="estimate {f} {ss} --model {model} --depth 1")
    ss_case("ss_roi_contour_unknown_roi.dcm",
            lambda d: setattr(d.ROIContourSequence[1], "ReferencedROINumber", 99),
            "refers to ROI 99")
    def two_external(d):
        d.RTROIObservationsSequence[1].RTROIInterpretedType = "EXTERNAL"
    ss_case("ss_two_external.dcm", two_external, "two ROIs are typed EXTERNAL")
    ss_case("ss_too_many_points.dcm",
            lambda d: setattr(d.ROIContourSequence[0].ContourSequence[0], "NumberOfContourPoints",
                              21000000),
            "more than 20000000 contour points")
    ss_case("ss_wrong_modality.dcm", lambda d: setattr(d, "Modality", "RTPLAN"),
            "contradicts the SOP Class (RT Structure Set)")

    rtdose_cases()
    yaml_cases()
    facts_cases()
    invivo_cases()

    with open(os.path.join(HERE, "cases.tsv"), "w") as f:
        f.write("# file\targuments\texit\tmessage fragment\n")
        for r in rows:
            f.write("%s\t%s\t%d\t%s\n" % r)
    print("%d bad inputs written" % len(rows))


# ------------------------------------------------------------- RT Dose --

RT_DOSE = "1.2.840.10008.5.1.4.1.1.481.2"


def base_dose(summation="PLAN", beams=(1,)):
    """An RT Dose of the good plan (DICOM PS3.3 A.18 RT Dose IOD, C.8.8.3 RT
    Dose Module): an axial grid over the body box every 20 mm, 16-bit values
    times Dose Grid Scaling, frames as offsets from Image Position (Patient).
    The dose is invented (a smooth fall-off from the beam's axis), not a
    planning system's."""
    import numpy as np
    from pydicom.dataset import Dataset, FileMetaDataset
    plan = base_plan()
    xs = np.arange(-140.0, 141.0, 20.0)
    ys = np.arange(-100.0, 101.0, 20.0)
    zs = np.arange(-140.0, 141.0, 20.0)
    zz, yy, xx = np.meshgrid(zs, ys, xs, indexing="ij")
    # the plan's course dose at the beam's reference point is 10 Gy: the
    # grid peaks there (a grid far below it is refused)
    gy = 10.0 * np.exp(-(xx ** 2 + zz ** 2) / (2 * 60.0 ** 2))
    scale = 1e-3
    ds = Dataset()
    ds.file_meta = FileMetaDataset()
    ds.file_meta.MediaStorageSOPClassUID = RT_DOSE
    ds.file_meta.MediaStorageSOPInstanceUID = rb.uid("bad", "dose", summation)
    ds.SOPClassUID = RT_DOSE
    ds.SOPInstanceUID = ds.file_meta.MediaStorageSOPInstanceUID
    ds.StudyInstanceUID = plan.StudyInstanceUID
    ds.SeriesInstanceUID = rb.uid("bad", "dose-series")
    ds.Modality = "RTDOSE"
    ds.PatientName = plan.PatientName
    ds.PatientID = plan.PatientID
    ds.FrameOfReferenceUID = plan.FrameOfReferenceUID
    ds.ImagePositionPatient = [float(xs[0]), float(ys[0]), float(zs[0])]
    ds.ImageOrientationPatient = [1, 0, 0, 0, 1, 0]
    ds.SamplesPerPixel = 1
    ds.PhotometricInterpretation = "MONOCHROME2"
    ds.NumberOfFrames = len(zs)
    ds.FrameIncrementPointer = 0x3004000C
    ds.Rows = len(ys)
    ds.Columns = len(xs)
    ds.PixelSpacing = [20.0, 20.0]
    ds.BitsAllocated = 16
    ds.BitsStored = 16
    ds.HighBit = 15
    ds.PixelRepresentation = 0
    ds.DoseUnits = "GY"
    ds.DoseType = "PHYSICAL"
    ds.DoseSummationType = summation
    ds.DoseComment = "INVENTED DEMO DATA - NOT FOR CLINICAL USE"
    ds.GridFrameOffsetVector = [float(z - zs[0]) for z in zs]
    ds.DoseGridScaling = scale
    ref = Dataset()
    ref.ReferencedSOPClassUID = rb.RT_PLAN
    ref.ReferencedSOPInstanceUID = plan.SOPInstanceUID
    if summation == "BEAM":
        fg = Dataset()
        fg.ReferencedFractionGroupNumber = 1
        items = []
        for b in beams:
            it = Dataset()
            it.ReferencedBeamNumber = b
            items.append(it)
        fg.ReferencedBeamSequence = Sequence(items)
        ref.ReferencedFractionGroupSequence = Sequence([fg])
    ds.ReferencedRTPlanSequence = Sequence([ref])
    ds.PixelData = np.rint(gy / scale).astype("<u2").tobytes()
    return ds


def rtdose_cases():
    """The planning system's dose (estimate --tps-dose): each broken RT Dose
    gives one line naming the file and the element, exit 3."""
    args = "estimate {plan} {ss} --model {model} --tps-dose {f}"
    good = base_dose()
    rb.save(good, os.path.join(HERE, "good_rtdose.dcm"))
    good_bytes = open(os.path.join(HERE, "good_rtdose.dcm"), "rb").read()

    def dose_case(name, mutate, fragment, summation="PLAN", beams=(1,)):
        ds = base_dose(summation, beams)
        mutate(ds)
        save(name, ds, args, 3, fragment)

    # the pixel data cut short: by the file's end, or a whole but short element
    raw("rtdose_truncated_pixel_data.dcm", good_bytes[:-1001], args, 3,
        "not a readable DICOM file, or cut short")
    dose_case("rtdose_short_pixel_data.dcm",
              lambda d: setattr(d, "PixelData", d.PixelData[:len(d.PixelData) // 2]),
              "holds fewer values than Rows x Columns x Number of Frames")
    dose_case("rtdose_missing_scaling.dcm", lambda d: delete(d, "DoseGridScaling"),
              "DoseGridScaling (3004,000E): missing or not one positive number")
    dose_case("rtdose_zero_scaling.dcm", lambda d: raw_ds(d, "DoseGridScaling", "0"),
              "DoseGridScaling (3004,000E): missing or not one positive number")
    dose_case("rtdose_scaling_decimal_comma.dcm",
              lambda d: raw_ds(d, "DoseGridScaling", "1,0E-4"),
              "DoseGridScaling (3004,000E): value 1 '1,0E-4' is not a decimal string")
    dose_case("rtdose_other_frame.dcm",
              lambda d: setattr(d, "FrameOfReferenceUID", rb.uid("bad", "other-frame")),
              "FrameOfReferenceUID (0020,0052)")
    dose_case("rtdose_missing_frame.dcm", lambda d: delete(d, "FrameOfReferenceUID"),
              "FrameOfReferenceUID (0020,0052): missing or empty")
    dose_case("rtdose_other_plan.dcm",
              lambda d: setattr(d.ReferencedRTPlanSequence[0], "ReferencedSOPInstanceUID",
                                rb.uid("bad", "other-plan")),
              "the dose was computed for another plan")
    dose_case("rtdose_no_plan_reference.dcm", lambda d: delete(d, "ReferencedRTPlanSequence"),
              "ReferencedRTPlanSequence (300C,0002): must hold exactly one item")

    # Grid Frame Offset Vector (PS3.3 C.8.8.3.2): frames strictly in order,
    # one offset a frame, relative (first 0) or absolute (first = z of the
    # position). Uneven but ordered offsets are legal and read as they are.
    def offsets(d, values):
        d.GridFrameOffsetVector = values
    n = 15
    ordered = [20.0 * k for k in range(n)]
    swapped = ordered[:]
    swapped[5], swapped[6] = swapped[6], swapped[5]
    dose_case("rtdose_frames_out_of_order.dcm", lambda d: offsets(d, swapped),
              "GridFrameOffsetVector (3004,000C): the frames are not strictly in order")
    repeated = ordered[:]
    repeated[7] = repeated[6]
    dose_case("rtdose_frames_repeated.dcm", lambda d: offsets(d, repeated),
              "GridFrameOffsetVector (3004,000C): the frames are not strictly in order")
    dose_case("rtdose_offsets_too_few.dcm", lambda d: offsets(d, ordered[:-1]),
              "GridFrameOffsetVector (3004,000C): has 14 offsets for 15 frames")
    dose_case("rtdose_offsets_neither.dcm", lambda d: offsets(d, [5.0 + v for v in ordered]),
              "GridFrameOffsetVector (3004,000C): neither relative")
    dose_case("rtdose_offsets_missing.dcm", lambda d: delete(d, "GridFrameOffsetVector"),
              "GridFrameOffsetVector (3004,000C): has 0 offsets for 15 frames")

    dose_case("rtdose_relative_units.dcm", lambda d: setattr(d, "DoseUnits", "RELATIVE"),
              "DoseUnits (3004,0002): 'RELATIVE': only absolute dose (GY)")
    dose_case("rtdose_effective_dose.dcm", lambda d: setattr(d, "DoseType", "EFFECTIVE"),
              "DoseType (3004,0004): 'EFFECTIVE': only PHYSICAL dose is read")
    dose_case("rtdose_fraction_summation.dcm",
              lambda d: setattr(d, "DoseSummationType", "FRACTION"),
              "DoseSummationType (3004,000A): 'FRACTION': only PLAN and BEAM")
    dose_case("rtdose_beam_without_beams.dcm",
              lambda d: delete(d.ReferencedRTPlanSequence[0], "ReferencedFractionGroupSequence"),
              "a BEAM dose must name one fraction group and its beams", summation="BEAM")
    dose_case("rtdose_beam_not_in_plan.dcm", lambda d: None,
              "ReferencedBeamNumber (300C,0006) 7 is not a beam of", summation="BEAM",
              beams=(7,))
    dose_case("rtdose_oblique.dcm",
              lambda d: setattr(d, "ImageOrientationPatient", [1, 0, 0, 0, 0, -1]),
              "ImageOrientationPatient (0020,0037): only axial grids")
    dose_case("rtdose_pixel_spacing_one_value.dcm",
              lambda d: raw_ds(d, "PixelSpacing", "20"),
              "PixelSpacing (0028,0030): expected two positive spacings")
    dose_case("rtdose_bits_8.dcm", lambda d: setattr(d, "BitsAllocated", 8),
              "BitsAllocated (0028,0100): 8 is outside 16..32")
    dose_case("rtdose_high_bit.dcm", lambda d: setattr(d, "HighBit", 14),
              "HighBit (0028,0102): must be Bits Stored - 1")
    # compressed frames (PS3.5 A.4.2, RLE Lossless, pydicom's encoder): said
    # so, not taken for a short element
    from pydicom.uid import RLELossless
    from pydicom.uid import ExplicitVRLittleEndian
    rle = base_dose()
    rle.file_meta.TransferSyntaxUID = ExplicitVRLittleEndian
    rle.is_little_endian, rle.is_implicit_VR = True, False
    rle.compress(RLELossless)
    path = os.path.join(HERE, "rtdose_rle_compressed.dcm")
    rle.save_as(path, write_like_original=False)
    rows.append(("rtdose_rle_compressed.dcm", args, 3,
                 "PixelData (7FE0,0010): compressed (transfer syntax RLE Lossless"))

    def huge(d):
        d.Rows = 65535
        d.Columns = 65535
        d.NumberOfFrames = 1000
    dose_case("rtdose_huge_grid.dcm", huge, "voxels is larger than strayline reads")
    # a file of another kind given as the dose
    save("rtdose_is_a_plan.dcm", base_plan(), args, 3, "is not RT Dose Storage")


# ------------------------------------------------------------ YAML / CSV --

def good_model():
    """A small, valid model file (hand-made, invented)."""
    d = [float(x) for x in range(0, 16)]
    def prof(depth, a, l1, c, l2):
        return {"energy_mev": 9, "applicator": "A10", "insert": "open", "depth_cm": depth,
                "direction": "crossplane", "data_file": "hand.csv", "data_sha256": "b" * 64,
                "uncertainty": {"relative": 0.02, "floor_percent": 0.01}, "range_cm": [0.0, 15.0],
                "fit": {"form": "smooth",
                        "parameters": {"a_percent": a, "lambda1_cm": l1, "c_percent": c,
                                       "lambda2_cm": l2},
                        "covariance": [[1e-4 if i == j else 0.0 for j in range(4)]
                                       for i in range(4)],
                        "covariance_scale": 1.0, "n": 16, "dof": 12, "chi2": 12.0,
                        "chi2_reduced": 1.0, "aicc": 23.6, "rms_residual_percent": 0.01,
                        "max_residual_percent": 0.02, "rms_residual_relative": 0.01,
                        "max_residual_relative": 0.02, "max_residual_sigma": 1.5, "poor": False},
                "points": {"distance_cm": list(d),
                           "dose_percent": [a * math.exp(-x / l1) + c * math.exp(-x / l2)
                                            for x in d]}}
    return {
        "format": "strayline-model", "format_version": 1, "model_version": "bad-input base",
        "notice": "INVENTED TEST DATA - NOT FOR CLINICAL USE",
        "machine": {"name": "DEMO-BAD", "nominal_ssd_cm": 100.0, "sad_cm": 100.0, "invented": True},
        "applicators": [{"id": "A10", "shape": "square", "field_x_cm": 10.0, "field_y_cm": 10.0}],
        "inserts": [],
        "outputs": [{"energy_mev": 9, "applicator": "A10", "dose_per_mu_cgy": 1.0,
                     "dmax_cm": 2.0, "effective_ssd_cm": 95.0}],
        "provenance": {"measurement_set": "none", "measurement_set_sha256": "0" * 64,
                       "tool": "make_bad.py", "created": "2026-12-01", "measured_date": "2026-12-01",
                       "measured_by": "nobody (invented)", "detector": "none",
                       "reference": "percent of the central-axis maximum"},
        "profiles": [prof(0.0, 40.0, 1.0, 2.0, 10.0), prof(2.0, 30.0, 1.5, 1.5, 12.0)],
    }


def write_yaml(name, doc, args, code, fragment):
    with open(os.path.join(HERE, name), "w") as f:
        yaml.safe_dump(doc, f, sort_keys=False)
    rows.append((name, args, code, fragment))


def write_text(name, text, args, code, fragment):
    with open(os.path.join(HERE, name), "w") as f:
        f.write(text)
    rows.append((name, args, code, fragment))


def good_measurements(csv_names=("ok1.csv", "ok2.csv")):
    return {
        "format": "strayline-measurements", "format_version": 1,
        "notice": "INVENTED TEST DATA - NOT FOR CLINICAL USE",
        "machine": {"name": "DEMO-BAD", "nominal_ssd_cm": 100.0, "sad_cm": 100.0, "invented": True},
        "measured": {"date": "2026-12-01", "by": "nobody (invented)", "detector": "none"},
        "reference": "percent of the central-axis maximum",
        "applicators": [{"id": "A10", "shape": "square", "field_x_cm": 10.0, "field_y_cm": 10.0}],
        "outputs": [{"energy_mev": 9, "applicator": "A10", "dose_per_mu_cgy": 1.0, "dmax_cm": 2.0,
                     "effective_ssd_cm": 95.0}],
        "profiles": [{"energy_mev": 9, "applicator": "A10", "insert": "open", "depth_cm": z,
                      "direction": "crossplane", "file": "csv/" + n,
                      "uncertainty": {"relative": 0.02, "floor_percent": 0.01}}
                     for z, n in zip((0.0, 1.0), csv_names)],
    }


def yaml_cases():
    os.makedirs(os.path.join(HERE, "csv"), exist_ok=True)
    for f in os.listdir(os.path.join(HERE, "csv")):
        os.remove(os.path.join(HERE, "csv", f))
    show = "model show {f}"
    fit = "fit {f} -o {tmp}/model.yaml -q"
    base = good_model()
    with open(os.path.join(HERE, "good_model.yaml"), "w") as f:
        yaml.safe_dump(base, f, sort_keys=False)

    def model_case(name, mutate, fragment):
        doc = good_model()
        mutate(doc)
        write_yaml(name, doc, show, 3, fragment)

    def fit0(doc):
        return doc["profiles"][0]["fit"]

    write_text("model_syntax_error.yaml", "format: strayline-model\nmachine: [unclosed\n", show, 3,
               "YAML syntax error")
    write_text("model_empty.yaml", "", show, 3, "empty file")
    write_text("model_two_documents.yaml", yaml.safe_dump(base) + "---\nformat: x\n", show, 3,
               "more than one YAML document")
    model_case("model_wrong_format.yaml", lambda d: d.update(format="something-else"),
               "this is not a strayline model file")
    model_case("model_wrong_version.yaml", lambda d: d.update(format_version=7),
               "format_version 7")
    model_case("model_missing_key.yaml", lambda d: d["machine"].pop("sad_cm"),
               "machine: missing key 'sad_cm'")
    model_case("model_unknown_key.yaml", lambda d: d["machine"].update(colour="blue"),
               "unknown key 'colour'")
    model_case("model_wrong_type.yaml", lambda d: d["outputs"][0].update(dmax_cm="deep"),
               "dmax_cm: 'deep' is not a finite number")
    model_case("model_negative_length.yaml",
               lambda d: fit0(d)["parameters"].update(lambda1_cm=-1.0),
               "lambda1_cm: -1 lies outside")

    def scale(factor, energy=9, applicator="A10"):
        # an in-vivo scale factor (invivo_scales, models/README.md) with its evidence
        def mutate(d):
            d["invivo_scales"] = [{"energy_mev": energy, "applicator": applicator,
                                   "factor": factor, "readings": 8,
                                   "first_date": "2026-03-01", "last_date": "2026-03-09",
                                   "mean_log_ratio": 0.1, "mean_log_ratio_ci95": [0.05, 0.15],
                                   "p_value": 0.01, "source": "invented test evidence"}]
        return mutate
    model_case("model_scale_zero.yaml", scale(0.0),
               "factor 0 is outside the plausible 0.2 to 5")
    model_case("model_scale_negative.yaml", scale(-1.2),
               "factor -1.2 is outside the plausible 0.2 to 5")
    model_case("model_scale_absurd.yaml", scale(7.5),
               "factor 7.5 is outside the plausible 0.2 to 5")
    model_case("model_scale_uncommissioned.yaml", scale(1.1, applicator="A15"),
               "9 MeV, applicator A15 is not commissioned")
    model_case("model_nan.yaml", lambda d: fit0(d)["parameters"].update(c_percent=float("nan")),
               "c_percent: '.nan' is not a finite number")
    model_case("model_inf.yaml", lambda d: d["outputs"][0].update(dose_per_mu_cgy=float("inf")),
               "dose_per_mu_cgy: '.inf' is not a finite number")
    model_case("model_negative_output.yaml", lambda d: d["outputs"][0].update(dose_per_mu_cgy=-1),
               "dose_per_mu_cgy: -1 lies outside")
    def non_monotonic(d):
        pts = d["profiles"][0]["points"]["distance_cm"]
        pts[3], pts[4] = pts[4], pts[3]
    model_case("model_non_monotonic_grid.yaml", non_monotonic, "distance_cm is not increasing")
    model_case("model_duplicate_profile.yaml",
               lambda d: d["profiles"].append(good_model()["profiles"][0]),
               "duplicate of profile 1")
    model_case("model_duplicate_applicator.yaml",
               lambda d: d["applicators"].append(dict(d["applicators"][0])),
               "duplicate applicator id 'A10'")
    model_case("model_covariance_asymmetric.yaml",
               lambda d: fit0(d)["covariance"][0].__setitem__(1, 0.5),
               "the covariance is not symmetric")
    model_case("model_covariance_size.yaml", lambda d: fit0(d)["covariance"].pop(),
               "covariance has 3 rows")
    model_case("model_dof_mismatch.yaml", lambda d: fit0(d).update(dof=5),
               "dof 5 does not equal n 16 minus 4 parameters")
    # a fit its own points contradict (an edited file): refused
    def scale_amplitudes(d):
        fit0(d)["parameters"]["a_percent"] /= 10
        fit0(d)["parameters"]["c_percent"] /= 10
    model_case("model_fit_edited_parameters.yaml", scale_amplitudes,
               "the fit is marked good (poor: false), but its own points give")
    model_case("model_fit_n_not_points.yaml",
               lambda d: fit0(d).update(n=fit0(d)["n"] + 1, dof=fit0(d)["dof"] + 1),
               "fit n is 17, but the profile holds 16 points")
    model_case("model_fit_zero_covariance.yaml",
               lambda d: fit0(d).update(covariance=[[0.0] * 4 for _ in range(4)]),
               "the variance of a_percent is not positive")
    model_case("model_uncommissioned_output.yaml",
               lambda d: d["profiles"][0].update(energy_mev=12),
               "no output is given for 12 MeV")
    # format 2: every profile states its tilt and SSD; format 1 knows neither
    def v2(tilt=0.0, ssd=100.0):
        def mutate(d):
            d["format_version"] = 2
            for p in d["profiles"]:
                p.update(tilt_deg=tilt, ssd_cm=ssd)
        return mutate
    model_case("model_tilt_absurd.yaml", v2(tilt=90.0), "tilt_deg: 90 lies outside")
    model_case("model_tilt_negative_absurd.yaml", v2(tilt=-361.0), "tilt_deg: -361 lies outside")
    model_case("model_ssd_negative.yaml", v2(ssd=-100.0), "ssd_cm: -100 lies outside")
    model_case("model_ssd_absurd.yaml", v2(ssd=400.0), "ssd_cm: 400 lies outside")
    def v2_missing(d):
        v2()(d)
        d["profiles"][0].pop("tilt_deg")
    model_case("model_v2_missing_tilt.yaml", v2_missing, "profile 1: missing key 'tilt_deg'")
    model_case("model_v1_with_tilt.yaml", lambda d: d["profiles"][0].update(tilt_deg=5.0),
               "tilt_deg needs format_version 2")
    model_case("model_unknown_insert.yaml", lambda d: d["profiles"][0].update(insert="C9"),
               "insert 'C9' is not listed")
    def bad_relative(d):
        d["inserts"] = [{"id": "C6", "applicator": "A10", "shape": "circle", "size_x_cm": 6.0,
                         "size_y_cm": 6.0, "profiles_relative_to": "somewhere"}]
    model_case("model_bad_relative_to.yaml", bad_relative, "profiles_relative_to 'somewhere'")
    def transfer(bands, mark="common practice"):
        return lambda d: d["machine"].update(
            transfer_uncertainty={"source": "test", "mark": mark, "bands": bands})
    model_case("model_transfer_no_open_band.yaml",
               transfer([{"below_cm": 5.0, "relative": 0.2}]),
               "the last band has no below_cm")
    model_case("model_transfer_not_increasing.yaml",
               transfer([{"below_cm": 5.0, "relative": 0.2}, {"below_cm": 3.0, "relative": 0.3},
                         {"relative": 1.0}]),
               "below_cm must increase")
    model_case("model_transfer_negative.yaml",
               transfer([{"below_cm": 5.0, "relative": -0.2}, {"relative": 1.0}]),
               "relative")
    model_case("model_transfer_bad_mark.yaml", transfer([{"relative": 1.0}], mark="guess"),
               "mark 'guess'")
    model_case("model_bad_form.yaml", lambda d: fit0(d).update(form="cubic"),
               "form 'cubic' (smooth or peaked)")
    model_case("model_bad_sha.yaml", lambda d: d["profiles"][0].update(data_sha256="xyz"),
               "expected 64 lowercase hex digits")
    # every report and the log name the model by its version (found by an
    # independent review: an empty one was taken)
    model_case("model_empty_version.yaml", lambda d: d.update(model_version=""),
               "model_version: empty")
    # a text with a duplicate key (PyYAML would not write one)
    text = yaml.safe_dump(base, sort_keys=False).replace("sad_cm: 100.0",
                                                        "sad_cm: 100.0\n  sad_cm: 90.0", 1)
    write_text("model_duplicate_key.yaml", text, show, 3, "duplicate key 'sad_cm'")
    nested = "format: strayline-model\nx: " + "[" * 200 + "]" * 200 + "\n"
    write_text("model_deeply_nested.yaml", nested, show, 3, "nested more than 32 levels deep")
    laughs = ["format: strayline-model", "a: &a [\"lol\", \"lol\", \"lol\", \"lol\"]"]
    prev = "a"
    for k in "bcdefghij":
        laughs.append("%s: &%s [*%s, *%s, *%s, *%s, *%s, *%s, *%s, *%s, *%s]" %
                      ((k, k) + (prev,) * 9))
        prev = k
    write_text("model_billion_laughs.yaml", "\n".join(laughs) + "\n", show, 3,
               "anchors and aliases are not accepted")
    write_text("model_self_alias.yaml", "format: &x [*x]\n", show, 3,
               "anchors and aliases are not accepted")
    write_text("model_not_a_mapping.yaml", "- just\n- a list\n", show, 3,
               "model file: expected a mapping of keys")
    # each kind of YAML file handed where the other is expected says what it is
    write_yaml("model_is_a_measurement_set.yaml", good_measurements(), show, 3,
               "this is a measurement set, not a model file: run `strayline fit")
    write_yaml("ms_is_a_model.yaml", good_model(), fit, 3,
               "this is a model file, not a measurement set")

    # measurement sets and their CSV files
    def csv_text(rows, head="edge_distance_cm,dose_percent"):
        return head + "\n" + "".join("%g,%g\n" % r for r in rows) + ""
    good_rows = [(x, 40 * math.exp(-x) + 2 * math.exp(-x / 10)) for x in range(0, 16)]
    for n in ("ok1.csv", "ok2.csv"):
        with open(os.path.join(HERE, "csv", n), "w") as f:
            f.write(csv_text(good_rows))
    with open(os.path.join(HERE, "good_measurements.yaml"), "w") as f:
        yaml.safe_dump(good_measurements(), f, sort_keys=False)

    def ms_case(name, mutate, fragment, csv=None, csv_body=None):
        doc = good_measurements()
        if csv:
            with open(os.path.join(HERE, "csv", csv), "w") as f:
                f.write(csv_body)
            doc["profiles"][1]["file"] = "csv/" + csv
        if mutate:
            mutate(doc)
        write_yaml(name, doc, fit, 3, fragment)

    write_text("ms_syntax_error.yaml", "format: strayline-measurements\nprofiles: {\n", fit, 3,
               "YAML syntax error")
    ms_case("ms_missing_key.yaml", lambda d: d.pop("reference"), "missing key 'reference'")
    ms_case("ms_unknown_key.yaml", lambda d: d["profiles"][0].update(colour=1),
            "profile 1: unknown key 'colour'")
    ms_case("ms_negative_depth.yaml", lambda d: d["profiles"][0].update(depth_cm=-1),
            "depth_cm: -1 lies outside")
    ms_case("ms_nan_uncertainty.yaml",
            lambda d: d["profiles"][0]["uncertainty"].update(relative=float("nan")),
            "uncertainty relative: '.nan' is not a finite number")
    ms_case("ms_wrong_type.yaml", lambda d: d["profiles"][0].update(energy_mev="nine"),
            "energy_mev: 'nine' is not a finite number")
    ms_case("ms_duplicate_profile.yaml",
            lambda d: d["profiles"].append(copy.deepcopy(d["profiles"][0])),
            "duplicate of profile 1")
    # beam tilt and SSD (format 2): absurd values, one line each
    ms_case("ms_tilt_absurd.yaml", lambda d: d["profiles"][0].update(tilt_deg=75),
            "tilt_deg: 75 lies outside")
    ms_case("ms_tilt_negative_absurd.yaml", lambda d: d["profiles"][0].update(tilt_deg=-400),
            "tilt_deg: -400 lies outside")
    ms_case("ms_ssd_negative.yaml", lambda d: d["profiles"][0].update(ssd_cm=-100),
            "ssd_cm: -100 lies outside")
    ms_case("ms_ssd_absurd.yaml", lambda d: d["profiles"][0].update(ssd_cm=1000),
            "ssd_cm: 1000 lies outside")
    ms_case("ms_output_ssd_absurd.yaml", lambda d: d["outputs"][0].update(ssd_cm=5),
            "ssd_cm: 5 lies outside")
    ms_case("ms_tilt_text.yaml", lambda d: d["profiles"][0].update(tilt_deg="steep"),
            "tilt_deg: 'steep' is not a finite number")
    ms_case("ms_unknown_applicator.yaml", lambda d: d["profiles"][0].update(applicator="A99"),
            "applicator 'A99' is not in the list")
    ms_case("csv_missing_file.yaml", lambda d: d["profiles"][0].update(file="csv/none.csv"),
            "none.csv: cannot open")
    ms_case("ms_bad_direction.yaml", lambda d: d["profiles"][0].update(direction="upward"),
            "direction 'upward'")
    ms_case("ms_empty_profiles.yaml", lambda d: d.update(profiles=[]),
            "profiles: the list is empty")
    ms_case("csv_missing_column.yaml", None, "the header must name two columns",
            csv="missing_column.csv", csv_body="edge_distance_cm\n0\n1\n2\n")
    ms_case("csv_text_in_numbers.yaml", None, "line 4: 'ten' is not a finite number",
            csv="text.csv", csv_body=csv_text(good_rows[:2]) + "2,ten\n" +
            "".join("%g,%g\n" % r for r in good_rows[3:]))
    rows_nm = list(good_rows)
    rows_nm[5], rows_nm[6] = rows_nm[6], rows_nm[5]
    ms_case("csv_non_monotonic.yaml", None, "does not increase on the row before",
            csv="non_monotonic.csv", csv_body=csv_text(rows_nm))
    through = [(x * 0.5, 100.0 if abs(x * 0.5) < 30 else 1.0) for x in range(-20, 21)]
    ms_case("csv_no_crossing.yaml", None, "no 50 % crossing",
            csv="no_crossing.csv", csv_body=csv_text(through, "off_axis_cm,dose_percent"))
    ms_case("csv_single_point.yaml", None, "1 data rows; a profile needs at least 6",
            csv="single.csv", csv_body=csv_text(good_rows[:1]))
    ms_case("csv_wrong_header.yaml", None, "first column 'x_mm'",
            csv="wrong_header.csv", csv_body=csv_text(good_rows, "x_mm,dose_percent"))
    ms_case("csv_reading_without_cax.yaml", None, "gives no cax_reading",
            csv="reading.csv", csv_body=csv_text(good_rows, "edge_distance_cm,reading"))
    # action-level tables, through the estimate
    est = "estimate {plan} {ss} --model {model} --levels {f}"
    lv = yaml.safe_load(open(os.path.join(HERE, "..", "..", "..", "models", "action-levels.yaml")))
    def lv_case(name, mutate, fragment):
        doc = copy.deepcopy(lv)
        mutate(doc)
        write_yaml(name, doc, est, 3, fragment)
    lv_case("levels_unknown_mark.yaml", lambda d: d["kinds"][0]["levels"][0].update(mark="guess"),
            "mark 'guess'")
    lv_case("levels_negative_dose.yaml", lambda d: d["kinds"][0]["levels"][0].update(dose_gy=-0.5),
            "dose_gy: -0.5")
    lv_case("levels_missing_source.yaml", lambda d: d["kinds"][0]["levels"][0].pop("source"),
            "missing key 'source'")
    lv_case("levels_wrong_format.yaml", lambda d: d.update(format="levels"),
            "not a strayline action-level table")
    def device_kind(d):
        return next(k for k in d["kinds"] if k["kind"] == "cardiac_device")
    lv_case("levels_unknown_pacing_band.yaml",
            lambda d: device_kind(d)["bands"].update(pacing_dependent_min_band="moderate"),
            "pacing_dependent_min_band 'moderate': no band of that name")
    lv_case("levels_bad_exposure.yaml",
            lambda d: d["kinds"][0]["levels"][0].update(exposure="weekly"),
            "exposure 'weekly': expected single, fractionated or any")
    ms_case("csv_unterminated_quote.yaml", None, "CSV error",
            csv="quote.csv", csv_body='edge_distance_cm,dose_percent\n0,"50\n1,20\n')
    # -- a NUL inside a CSV field would end it early: refused with its line
    ms_case("csv_nul_in_field.yaml", None, "line 4: a NUL byte",
            csv="nul.csv", csv_body=csv_text(good_rows[:2]) + "2,1\x005\n" +
            "".join("%g,%g\n" % r for r in good_rows[3:]))
    ms_case("csv_nul_after_bom.yaml", None, "line 1: a NUL byte",
            csv="nul_bom.csv", csv_body="\ufeffedge_distance_cm\x00,dose_percent\n0,1\n")
    # -- YAML tags and NUL characters: never ignored, never cut short
    def tagged(text, old, new, name, args, fragment):
        assert old in text
        write_text(name, text.replace(old, new, 1), args, 3, fragment)
    model_text = yaml.safe_dump(good_model(), sort_keys=False)
    tagged(model_text, "format: strayline-model", "format: !python/object strayline-model",
           "model_tag_python_object.yaml", show, "a YAML tag ('!python/object')")
    tagged(model_text, "model_version: bad-input base", "model_version: !!binary YmFk",
           "model_tag_binary.yaml", show, "a YAML tag ('tag:yaml.org,2002:binary')")
    tagged(model_text, "sad_cm: 100.0", "sad_cm: !custom 100.0",
           "model_tag_custom_number.yaml", show, "a YAML tag ('!custom')")
    tagged(model_text, "model_version: bad-input base", 'model_version: "bad\\0input"',
           "model_nul_in_string.yaml", show, "a NUL character")
    ms_text = yaml.safe_dump(good_measurements(), sort_keys=False)
    tagged(ms_text, "format: strayline-measurements", "format: !x strayline-measurements",
           "ms_tag.yaml", fit, "a YAML tag ('!x')")
    lv_text = yaml.safe_dump(lv, sort_keys=False)
    tagged(lv_text, "format: strayline-action-levels", "format: !!python/str strayline-action-levels",
           "levels_tag.yaml", est, "a YAML tag")
    # -- an unclosed bracket would match nothing: the lens would pass unjudged
    def lens_kind(d):
        return next(k for k in d["kinds"] if k["kind"] == "lens")
    lv_case("levels_pattern_unclosed_bracket.yaml",
            lambda d: lens_kind(d)["match"].insert(0, "lens_[lr"),
            "match pattern 'lens_[lr': a '[' without its ']'")
    lv_case("levels_pattern_unclosed_negated_bracket.yaml",
            lambda d: lens_kind(d)["match"].append("*[!x"),
            "a '[' without its ']'")


def facts_cases():
    """The per-patient facts file of scan and listen (README.md), and a
    screening log that is not one."""
    scan = "scan {tmp} --model {model} --out {tmp}/out --facts {f}"
    head = "format: strayline-patient-facts\npatients:\n"
    write_text("facts_wrong_format.yaml", "format: facts\npatients: []\n", scan, 3,
               "format: 'facts': expected 'strayline-patient-facts'")
    write_text("facts_weeks_out_of_range.yaml", head + "  - key: P1\n    gestational_age_weeks: 60\n",
               scan, 3, "gestational_age_weeks")
    write_text("facts_both_ages.yaml", head + "  - key: P1\n    gestational_age_weeks: 12\n"
               "    weeks_after_conception: 10\n", scan, 3, "not both")
    write_text("facts_duplicate_key.yaml", head + "  - key: P1\n  - key: P1\n", scan, 3,
               "key 'P1' given twice")
    write_text("facts_unknown_key.yaml", head + "  - key: P1\n    pregnant: yes\n", scan, 3,
               "unknown key 'pregnant'")
    write_text("facts_bad_sex.yaml", head + "  - key: P1\n    sex: X\n", scan, 3,
               "sex: 'X': M or F")
    write_text("facts_organ_without_kind.yaml", head + "  - key: P1\n    organs: [{roi: Baby}]\n",
               scan, 3, "missing key 'kind'")
    raw("log_not_sqlite.txt", b"screening log? no, plain text.\n" * 40,
        "history --log {f}", 3, "not a screening log")
    # another program's SQLite database whose user_version happens to be 2
    # (Python's sqlite3 writes it; the file is made in a scratch copy, as
    # SQLite output is not byte-stable across versions)
    import sqlite3
    import tempfile
    with tempfile.TemporaryDirectory() as t:
        con = sqlite3.connect(os.path.join(t, "f.sqlite"))
        con.execute("CREATE TABLE notes (x TEXT)")
        con.execute("PRAGMA user_version=2")
        con.commit()
        con.close()
        with open(os.path.join(t, "f.sqlite"), "rb") as f:
            foreign = f.read()
    raw("log_foreign_version_2.sqlite", foreign, "history --log {f}", 3,
        "but no table 'screening': not a strayline screening log")


def invivo_cases():
    """In-vivo readings files (README.md, 'In-vivo readings'); the plan and
    structure set named are the corpus's good pair, beside these files."""
    add = "invivo add {f} --model {model} --log {tmp}/log.sqlite"
    head = "format: strayline-invivo-readings\nformat_version: 1\nreadings:\n"

    def one(**change):
        r = {"id": "R1", "patient_id": "DEMO-BAD-00", "plan": "good_rtplan.dcm",
             "structure_set": "good_rtstruct.dcm", "date": "2026-03-02",
             "position": "{roi: Lens_L}", "fractions": "1", "detector": "OSL",
             "reading_cgy": "1.5", "energy_correction": "0.85"}
        r.update(change)
        lines = ["  - id: %s" % r.pop("id")]
        lines += ["    %s: %s" % (k, v) for k, v in r.items() if v is not None]
        return "\n".join(lines) + "\n"

    def case(name, body, fragment, code=3, args=add):
        write_text(name, head + body, args, code, fragment)

    write_text("invivo_wrong_format.yaml", "format: readings\nformat_version: 1\nreadings: []\n",
               add, 3, "not a strayline readings file")
    case("invivo_no_correction_key.yaml", one(energy_correction=None),
         "missing key 'energy_correction'")
    case("invivo_bad_detector.yaml", one(detector="chamber"), "detector 'chamber': TLD, OSL or diode")
    case("invivo_diode_without_u.yaml", one(detector="diode"),
         "a diode needs detector_uncertainty_percent")
    case("invivo_two_positions.yaml", one(position="{roi: Lens_L, point_mm: [0, 0, 0]}"),
         "give exactly one of roi")
    case("invivo_zero_reading.yaml", one(reading_cgy="0"), "a reading of 0 cannot be compared")
    case("invivo_bad_date.yaml", one(date="2026-13-01"), "needs YYYY-MM-DD")
    case("invivo_correction_out_of_range.yaml", one(energy_correction="3"), "energy_correction")
    case("invivo_duplicate_id.yaml", one() + one(), "the id is used twice")
    case("invivo_point_in_wrong_unit.yaml",
         one(position="{name: P, kind: lens, point_cm: [0, 0, 90000]}"), "more than 5 m")
    case("invivo_zero_fractions.yaml", one(fractions="0"), "fractions 0")
    case("invivo_plan_without_structures.yaml", one(structure_set=None),
         "give both plan and structure_set")
    case("invivo_wrong_patient.yaml", one(patient_id="SOMEONE-ELSE"),
         "PatientID (0010,0020): 'DEMO-BAD-00', but reading 'R1' is of patient 'SOMEONE-ELSE'")
    case("invivo_unknown_roi.yaml", one(position="{roi: Spleen}"), "no ROI 'Spleen'")
    case("invivo_unknown_kind.yaml",
         one(position="{name: P, kind: elbow, distance_cm: 10, depth_cm: 1}"),
         "unknown kind 'elbow'")
    case("invivo_too_many_fractions.yaml", one(fractions="99"), "fractions 99, but the fraction")
    raw("invivo_log_not_sqlite.txt", b"screening log? no, plain text.\n" * 40,
        "invivo report --log {f}", 3, "not a screening log")


if __name__ == "__main__":
    main()
