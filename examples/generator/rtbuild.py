"""Builders for DICOM RT Plans and RT Structure Sets, written with pydicom.

pydicom (Debian python3-pydicom) is an independent DICOM writer: strayline
reads through DCMTK, so files made here check the reader against a second
implementation. The demo cases in examples/ and the phantoms of the
reference tests are all made with these builders.

Everything made here is INVENTED DEMO DATA, not a real patient: the builders
stamp that text into every file (Patient Comments, Series and Plan
descriptions).

Lengths are millimetres and angles degrees, as DICOM stores them.
"""

import hashlib
import math

import numpy as np
import pydicom
from pydicom.dataset import Dataset, FileDataset, FileMetaDataset
from pydicom.sequence import Sequence
from pydicom.uid import (ExplicitVRBigEndian, ExplicitVRLittleEndian,
                         ImplicitVRLittleEndian)

RT_PLAN = "1.2.840.10008.5.1.4.1.1.481.5"
RT_STRUCT = "1.2.840.10008.5.1.4.1.1.481.3"
INVENTED = "INVENTED DEMO DATA - NOT A REAL PATIENT - NOT FOR CLINICAL USE"
# Deterministic UIDs under the "2.25" (UUID-derived) root, so that a
# generator run reproduces the shipped files byte for byte.
_SEED = "strayline-demo"


def uid(*parts):
    """A UID under the 2.25 root from a 128-bit hash of the parts (pydicom's
    generate_uid ignores its entropy sources under that root)."""
    text = "/".join([_SEED] + [str(p) for p in parts]).encode()
    return "2.25." + str(int(hashlib.sha256(text).hexdigest()[:32], 16))


def _ds_number(v):
    """A DS value string of at most 16 characters that survives the trip."""
    s = repr(float(v))
    if len(s) <= 16:
        return s
    return "%.10g" % v


def ds(values):
    return [_ds_number(v) for v in values]


def _common(dsx, patient, sop_class, sop_uid, modality, study_uid, series_uid, when):
    dsx.SpecificCharacterSet = "ISO_IR 100"
    dsx.SOPClassUID = sop_class
    dsx.SOPInstanceUID = sop_uid
    dsx.InstanceCreationDate = when[0]
    dsx.InstanceCreationTime = when[1]
    dsx.StudyDate = when[0]
    dsx.StudyTime = when[1]
    dsx.AccessionNumber = ""
    dsx.Modality = modality
    dsx.Manufacturer = "strayline demo generator"
    dsx.ReferringPhysicianName = ""
    dsx.StationName = "DEMO"
    dsx.ManufacturerModelName = "rtbuild.py"
    dsx.SoftwareVersions = "1"
    dsx.PatientName = patient["name"]
    dsx.PatientID = patient["id"]
    dsx.PatientBirthDate = patient.get("birth_date", "")
    dsx.PatientSex = patient.get("sex", "O")
    dsx.PatientComments = INVENTED
    dsx.StudyInstanceUID = study_uid
    dsx.SeriesInstanceUID = series_uid
    dsx.StudyID = "DEMO"
    dsx.SeriesNumber = 1
    dsx.InstanceNumber = 1
    dsx.SeriesDescription = INVENTED
    dsx.OperatorsName = ""


def _new_dataset(sop_class, sop_uid):
    meta = FileMetaDataset()
    meta.MediaStorageSOPClassUID = sop_class
    meta.MediaStorageSOPInstanceUID = sop_uid
    meta.ImplementationClassUID = uid("implementation")
    meta.ImplementationVersionName = "STRAYLINE_DEMO"
    dsx = FileDataset(None, {}, file_meta=meta, preamble=b"\0" * 128)
    return dsx


def _applicator(app):
    a = Dataset()
    a.ApplicatorID = app["id"]
    a.ApplicatorType = app.get("type", "ELECTRON_SQUARE")
    if app.get("description"):
        a.ApplicatorDescription = app["description"]
    geo = app.get("geometry")
    if geo:
        g = Dataset()
        g.ApplicatorApertureShape = geo["shape"]
        if "opening" in geo:
            g.ApplicatorOpening = float(geo["opening"])
        if "x" in geo:
            g.ApplicatorOpeningX = float(geo["x"])
        if "y" in geo:
            g.ApplicatorOpeningY = float(geo["y"])
        a.ApplicatorGeometrySequence = Sequence([g])
    if "source_to_applicator_mm" in app:
        a.SourceToApplicatorMountingPositionDistance = float(app["source_to_applicator_mm"])
    return a


def _block(blk, number):
    b = Dataset()
    b.BlockTrayID = blk.get("tray_id", "CUTOUT")
    b.SourceToBlockTrayDistance = _ds_number(blk.get("tray_mm", 950.0))
    b.BlockType = blk.get("type", "APERTURE")
    b.BlockDivergence = blk.get("divergence", "PRESENT")
    b.BlockMountingPosition = "PATIENT_SIDE"
    b.BlockNumber = blk.get("number", number)
    b.BlockName = blk.get("name", "cutout %d" % number)
    b.MaterialID = blk.get("material", "LMA")
    b.BlockThickness = _ds_number(blk.get("thickness_mm", 10.0))
    if "transmission" in blk:
        b.BlockTransmission = _ds_number(blk["transmission"])
    pts = np.asarray(blk["points_mm"], dtype=float)
    b.BlockNumberOfPoints = blk.get("declared_points", len(pts))
    b.BlockData = ds(pts.reshape(-1))
    return b


def plan_dataset(patient, *, label, beams, setups=None, fraction_groups=None,
                 dose_refs=None, frame_uid=None, structure_set_uid=None, name=None,
                 seed="plan", when=("20261201", "090000")):
    """An RT Plan. beams: list of dicts (see make_beam for the keys)."""
    sop_uid = uid(seed, "sop")
    dsx = _new_dataset(RT_PLAN, sop_uid)
    _common(dsx, patient, RT_PLAN, sop_uid, "RTPLAN", uid(patient["id"], "study"),
            uid(seed, "series"), when)
    if frame_uid:
        dsx.FrameOfReferenceUID = frame_uid
        dsx.PositionReferenceIndicator = ""
    dsx.RTPlanLabel = label
    if name:
        dsx.RTPlanName = name
    dsx.RTPlanDescription = INVENTED
    dsx.RTPlanDate = when[0]
    dsx.RTPlanTime = when[1]
    dsx.RTPlanGeometry = "PATIENT" if structure_set_uid else "TREATMENT_DEVICE"
    if structure_set_uid:
        r = Dataset()
        r.ReferencedSOPClassUID = RT_STRUCT
        r.ReferencedSOPInstanceUID = structure_set_uid
        dsx.ReferencedStructureSetSequence = Sequence([r])
    if dose_refs:
        items = []
        for i, d in enumerate(dose_refs, 1):
            it = Dataset()
            it.DoseReferenceNumber = d.get("number", i)
            it.DoseReferenceUID = uid(seed, "doseref", i)
            it.DoseReferenceStructureType = "SITE"
            it.DoseReferenceDescription = d.get("description", "target")
            it.DoseReferenceType = d.get("type", "TARGET")
            if "prescription_gy" in d:
                it.TargetPrescriptionDose = _ds_number(d["prescription_gy"])
            items.append(it)
        dsx.DoseReferenceSequence = Sequence(items)
    if setups is None:
        setups = [{"number": 1, "position": "HFS"}]
    items = []
    for s in setups:
        it = Dataset()
        it.PatientSetupNumber = s["number"]
        if s.get("position") is not None:
            it.PatientPosition = s["position"]
        items.append(it)
    dsx.PatientSetupSequence = Sequence(items)
    if fraction_groups is None:
        fraction_groups = [{"number": 1, "fractions": 1,
                            "beams": [(b["number"], b.get("mu", 100.0), b.get("beam_dose_gy"))
                                      for b in beams]}]
    fgs = []
    for fg in fraction_groups:
        it = Dataset()
        it.FractionGroupNumber = fg["number"]
        if fg.get("fractions") is not None:
            it.NumberOfFractionsPlanned = fg["fractions"]
        refs = []
        for entry in fg["beams"]:
            num, mu = entry[0], entry[1]
            bd = entry[2] if len(entry) > 2 else None
            r = Dataset()
            r.ReferencedBeamNumber = num
            if mu is not None:
                r.BeamMeterset = _ds_number(mu)
            if bd is not None:
                r.BeamDose = _ds_number(bd)
            refs.append(r)
        it.NumberOfBeams = fg.get("declared_beams", len(refs))
        it.NumberOfBrachyApplicationSetups = 0
        it.ReferencedBeamSequence = Sequence(refs)
        fgs.append(it)
    dsx.FractionGroupSequence = Sequence(fgs)
    dsx.BeamSequence = Sequence([make_beam(b, seed) for b in beams])
    dsx.ApprovalStatus = "UNAPPROVED"
    return dsx


def make_beam(b, seed="plan"):
    """Keys: number, name, description, radiation_type (ELECTRON), delivery
    (TREATMENT), beam_type (STATIC), machine, sad_mm (1000; None omits it),
    energy_mev, gantry, collimator, couch, eccentric, iso_mm, ssd_mm,
    applicator (dict), blocks (list of dicts), boli (ROI numbers), setup,
    control_points (2), declared_control_points, declared_blocks."""
    it = Dataset()
    it.BeamNumber = b["number"]
    it.BeamName = b.get("name", "beam %d" % b["number"])
    if b.get("description"):
        it.BeamDescription = b["description"]
    it.BeamType = b.get("beam_type", "STATIC")
    rad = b.get("radiation_type", "ELECTRON")
    it.RadiationType = rad
    it.TreatmentMachineName = b.get("machine", "DEMO-E1")
    it.PrimaryDosimeterUnit = "MU"
    if b.get("sad_mm", 1000.0) is not None:
        it.SourceAxisDistance = _ds_number(b.get("sad_mm", 1000.0))
    it.TreatmentDeliveryType = b.get("delivery", "TREATMENT")
    if b.get("setup") is not None:
        it.ReferencedPatientSetupNumber = b.get("setup", 1)
    jaws = []
    for kind in ("ASYMX", "ASYMY"):
        j = Dataset()
        j.RTBeamLimitingDeviceType = kind
        j.NumberOfLeafJawPairs = 1
        jaws.append(j)
    it.BeamLimitingDeviceSequence = Sequence(jaws)
    it.NumberOfWedges = 0
    it.NumberOfCompensators = 0
    boli = b.get("boli", [])
    it.NumberOfBoli = len(boli)
    if boli:
        items = []
        for n in boli:
            r = Dataset()
            r.ReferencedROINumber = n
            items.append(r)
        it.ReferencedBolusSequence = Sequence(items)
    blocks = b.get("blocks", [])
    it.NumberOfBlocks = b.get("declared_blocks", len(blocks))
    if blocks:
        it.BlockSequence = Sequence([_block(blk, i + 1) for i, blk in enumerate(blocks)])
    if b.get("applicator"):
        it.ApplicatorSequence = Sequence([_applicator(b["applicator"])])
    ncp = b.get("control_points", 2)
    it.NumberOfControlPoints = b.get("declared_control_points", ncp)
    it.FinalCumulativeMetersetWeight = "1"
    cps = []
    for i in range(ncp):
        cp = Dataset()
        cp.ControlPointIndex = i
        cp.CumulativeMetersetWeight = _ds_number(i / max(ncp - 1, 1))
        if i == 0:
            if b.get("energy_mev") is not None:
                cp.NominalBeamEnergy = _ds_number(b["energy_mev"])
            jx, jy = b.get("jaws_mm", (150.0, 150.0))
            pos = []
            for kind, half in (("ASYMX", jx), ("ASYMY", jy)):
                p = Dataset()
                p.RTBeamLimitingDeviceType = kind
                p.LeafJawPositions = ds([-half, half])
                pos.append(p)
            cp.BeamLimitingDevicePositionSequence = Sequence(pos)
            for key, tag in (("gantry", "GantryAngle"), ("collimator", "BeamLimitingDeviceAngle"),
                             ("couch", "PatientSupportAngle")):
                if b.get(key, 0.0) is not None:
                    setattr(cp, tag, _ds_number(b.get(key, 0.0)))
            cp.GantryRotationDirection = "NONE"
            cp.BeamLimitingDeviceRotationDirection = "NONE"
            cp.PatientSupportRotationDirection = "NONE"
            cp.TableTopEccentricAngle = _ds_number(b.get("eccentric", 0.0))
            cp.TableTopEccentricRotationDirection = "NONE"
            cp.TableTopVerticalPosition = ""
            cp.TableTopLongitudinalPosition = ""
            cp.TableTopLateralPosition = ""
            if b.get("iso_mm") is not None:
                cp.IsocenterPosition = ds(b["iso_mm"])
            if b.get("ssd_mm") is not None:
                cp.SourceToSurfaceDistance = _ds_number(b["ssd_mm"])
        elif b.get("moving_gantry_to") is not None:
            cp.GantryAngle = _ds_number(b["moving_gantry_to"])
            cp.GantryRotationDirection = "CW"
        cps.append(cp)
    it.ControlPointSequence = Sequence(cps)
    return it


def structure_dataset(patient, *, label, rois, frame_uid, seed="struct",
                      when=("20261201", "085000")):
    """An RT Structure Set. rois: list of dicts with number, name, type,
    color, contours: list of (geometric_type, points Nx3 in mm)."""
    sop_uid = uid(seed, "sop")
    dsx = _new_dataset(RT_STRUCT, sop_uid)
    _common(dsx, patient, RT_STRUCT, sop_uid, "RTSTRUCT", uid(patient["id"], "study"),
            uid(seed, "series"), when)
    dsx.FrameOfReferenceUID = frame_uid
    dsx.PositionReferenceIndicator = ""
    dsx.StructureSetLabel = label
    dsx.StructureSetName = label
    dsx.StructureSetDescription = INVENTED
    dsx.StructureSetDate = when[0]
    dsx.StructureSetTime = when[1]
    fr = Dataset()
    fr.FrameOfReferenceUID = frame_uid
    dsx.ReferencedFrameOfReferenceSequence = Sequence([fr])
    ss_rois, contours, observations = [], [], []
    for i, r in enumerate(rois, 1):
        s = Dataset()
        s.ROINumber = r["number"]
        s.ReferencedFrameOfReferenceUID = r.get("frame_uid", frame_uid)
        s.ROIName = r["name"]
        s.ROIGenerationAlgorithm = "MANUAL"
        ss_rois.append(s)
        c = Dataset()
        c.ROIDisplayColor = list(r.get("color", (255, 0, 0)))
        c.ReferencedROINumber = r["number"]
        items = []
        for ctype, pts in r["contours"]:
            pts = np.asarray(pts, dtype=float).reshape(-1, 3)
            ci = Dataset()
            ci.ContourGeometricType = ctype
            ci.NumberOfContourPoints = len(pts)
            ci.ContourData = ds(pts.reshape(-1))
            items.append(ci)
        if items:
            c.ContourSequence = Sequence(items)
        contours.append(c)
        o = Dataset()
        o.ObservationNumber = i
        o.ReferencedROINumber = r["number"]
        o.RTROIInterpretedType = r.get("type", "ORGAN")
        o.ROIInterpreter = ""
        observations.append(o)
    dsx.StructureSetROISequence = Sequence(ss_rois)
    dsx.ROIContourSequence = Sequence(contours)
    dsx.RTROIObservationsSequence = Sequence(observations)
    dsx.ApprovalStatus = "UNAPPROVED"
    return dsx


def save(dsx, path, syntax="explicit_le", meta=True):
    """Write with a chosen transfer syntax; meta=False leaves out the file
    meta header and preamble (a bare data set, as some exports are)."""
    ts = {"explicit_le": ExplicitVRLittleEndian, "implicit_le": ImplicitVRLittleEndian,
          "explicit_be": ExplicitVRBigEndian}[syntax]
    dsx.file_meta.TransferSyntaxUID = ts
    dsx.is_little_endian = syntax != "explicit_be"
    dsx.is_implicit_VR = syntax == "implicit_le"
    if meta:
        dsx.preamble = b"\0" * 128
        pydicom.dcmwrite(path, dsx, write_like_original=False)
    else:
        saved = dsx.file_meta
        dsx.file_meta = FileMetaDataset()
        dsx.preamble = None
        pydicom.dcmwrite(path, dsx, write_like_original=True)
        dsx.file_meta = saved


# ---------------------------------------------------------------- shapes --

def slices(z0, z1, step):
    n = int(round((z1 - z0) / step))
    return [z0 + i * step for i in range(n + 1)]


def ellipse(cx, cy, ax, ay, z, n=64, phase=0.0):
    t = phase + 2 * math.pi * np.arange(n) / n
    return np.column_stack([cx + ax * np.cos(t), cy + ay * np.sin(t), np.full(n, z)])


def ellipsoid(center, radii, step, n=64):
    """Closed planar contours of an ellipsoid on slices `step` mm apart; a
    slice whose section would be empty or degenerate is left out."""
    cx, cy, cz = center
    rx, ry, rz = radii
    out = []
    k = int(math.floor(rz / step))
    for i in range(-k, k + 1):
        z = cz + i * step
        f = 1 - ((z - cz) / rz) ** 2
        if f <= 1e-6:
            continue
        s = math.sqrt(f)
        out.append(("CLOSED_PLANAR", ellipse(cx, cy, rx * s, ry * s, z, n)))
    return out


def cylinder(center, radius_x, radius_y, z0, z1, step, n=64):
    cx, cy = center
    return [("CLOSED_PLANAR", ellipse(cx, cy, radius_x, radius_y, z, n)) for z in slices(z0, z1, step)]


def box(x0, x1, y0, y1, z0, z1, step):
    out = []
    for z in slices(z0, z1, step):
        out.append(("CLOSED_PLANAR", np.array([[x0, y0, z], [x1, y0, z], [x1, y1, z], [x0, y1, z]])))
    return out


def point(x, y, z):
    return [("POINT", np.array([[x, y, z]]))]


def square_cutout(half_mm):
    h = half_mm
    return [[-h, -h], [h, -h], [h, h], [-h, h]]
