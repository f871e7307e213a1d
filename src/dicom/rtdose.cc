/*
 * The DICOM bridge for RT Dose (see include/strayline/rtdose.h): a planning
 * system's dose grid read with DCMTK's dcmdata into plain C data.
 *
 * Like rt_read.cc it reads elements generically so that each missing or
 * malformed one is named with its keyword and tag, checks every DS value
 * against the PS3.5 grammar (ds_value.h), and lets no C++ exception cross
 * the C API. The pixel data are unsigned or signed 16- or 32-bit integers
 * (PS3.3 C.8.8.3.4.1: RT Dose Bits Allocated 16 or 32), scaled by Dose Grid
 * Scaling into Gy.
 *
 * It also writes an estimate's dose grid as an RT Dose (PS3.3 A.18: the
 * Patient, General Study, RT Series, Frame of Reference, General Equipment,
 * General Image, Image Plane, Image Pixel, Multi-frame, RT Dose and SOP
 * Common modules), copying the patient, study and frame from the plan file,
 * so that a viewer shows it over the plan's CT.
 */
#include "strayline/rtdose.h"
#include "ds_value.h"

#include <dcmtk/config/osconfig.h>
#include <dcmtk/dcmdata/dcdeftag.h>
#include <dcmtk/dcmdata/dcfilefo.h>
#include <dcmtk/dcmdata/dcuid.h>
#include <dcmtk/dcmdata/dcxfer.h>
#include <dcmtk/dcmdata/dcdatset.h>
#include <dcmtk/oflog/oflog.h>

#include <cerrno>
#include <cmath>
#include <cstdlib>
#include <cstring>
#include <mutex>
#include <new>
#include <string>
#include <sys/stat.h>
#include <vector>

namespace {

const char *const UID_RTDOSE_STORAGE = "1.2.840.10008.5.1.4.1.1.481.2";

struct failure {
    sl_status code;
};

class DoseReader {
public:
    DoseReader(const char *file, sl_error *err) : file_(file), err_(err) {}

    [[noreturn]] void fail(sl_status code, const std::string &where, const std::string &what)
    {
        if (where.empty())
            sl_error_set(err_, code, "%s: %s", file_, what.c_str());
        else
            sl_error_set(err_, code, "%s: %s: %s", file_, where.c_str(), what.c_str());
        throw failure{code};
    }

    static std::string name(const DcmTagKey &key, const std::string &ctx = "")
    {
        DcmTag tag(key);
        char buf[32];
        snprintf(buf, sizeof buf, "(%04X,%04X)", key.getGroup(), key.getElement());
        std::string n = std::string(tag.getTagName()) + " " + buf;
        return ctx.empty() ? n : ctx + " > " + n;
    }

    std::string str(DcmItem *item, const DcmTagKey &key)
    {
        OFString v;
        if (item->findAndGetOFStringArray(key, v).bad())
            return std::string();
        std::string s(v.c_str());
        size_t b = s.find_first_not_of(' '), e = s.find_last_not_of(' ');
        return b == std::string::npos ? std::string() : s.substr(b, e - b + 1);
    }

    std::string str_req(DcmItem *item, const DcmTagKey &key, const std::string &ctx = "")
    {
        std::string s = str(item, key);
        if (s.empty())
            fail(SL_EINPUT, name(key, ctx), "missing or empty");
        return s;
    }

    /* Every value of a DS element, each checked whole against the grammar. */
    std::vector<double> ds(DcmItem *item, const DcmTagKey &key, const std::string &ctx = "")
    {
        std::vector<double> out;
        std::string s = str(item, key);
        if (s.empty())
            return out;
        size_t from = 0;
        for (size_t i = 1;; i++) {
            size_t to = s.find('\\', from);
            if (to == std::string::npos)
                to = s.size();
            double d;
            if (!sl_dicom_internal::ds_convert(s.data() + from, s.data() + to, d)) {
                std::string v = s.substr(from, to - from);
                if (v.size() > 40)
                    v = v.substr(0, 40) + "...";
                fail(SL_EINPUT, name(key, ctx),
                     "value " + std::to_string(i) + " '" + v +
                         "' is not a decimal string (DS: optional sign, digits, decimal "
                         "point, exponent)");
            }
            out.push_back(d);
            if (to == s.size())
                break;
            from = to + 1;
        }
        return out;
    }

    /* An unsigned integer (US or IS) within [lo, hi]; required. */
    long uint_req(DcmItem *item, const DcmTagKey &key, long lo, long hi)
    {
        DcmElement *el = nullptr;
        if (item->findAndGetElement(key, el).bad() || !el || el->getLength() == 0)
            fail(SL_EINPUT, name(key), "missing or empty");
        long v = 0;
        if (el->ident() == EVR_US) {
            Uint16 u;
            if (el->getUint16(u).bad())
                fail(SL_EINPUT, name(key), "cannot read the value");
            v = u;
        } else {
            std::string s = str(item, key);
            char *end = nullptr;
            bool digits = !s.empty() && s.find_first_not_of("+0123456789") == std::string::npos;
            v = digits ? strtol(s.c_str(), &end, 10) : -1;
            if (!digits || !end || *end || s.size() > 10)
                fail(SL_EINPUT, name(key), "'" + s + "' is not an integer string");
        }
        if (v < lo || v > hi)
            fail(SL_EINPUT, name(key),
                 std::to_string(v) + " is outside " + std::to_string(lo) + ".." +
                     std::to_string(hi));
        return v;
    }

    char *cstr(const std::string &s)
    {
        if (s.empty())
            return nullptr;
        char *d = static_cast<char *>(malloc(s.size() + 1));
        if (!d)
            fail(SL_ENOMEM, "", "out of memory");
        memcpy(d, s.c_str(), s.size() + 1);
        return d;
    }

    const char *file() const { return file_; }

private:
    const char *file_;
    sl_error *err_;
};

void quiet()
{
    static std::once_flag once;
    std::call_once(once, [] { OFLog::configure(OFLogger::FATAL_LOG_LEVEL); });
}

void read_dose(DoseReader &r, DcmDataset *ds, E_TransferSyntax xfer, sl_rtdose *d)
{
    std::string cls = r.str(ds, DCM_SOPClassUID);
    if (cls != UID_RTDOSE_STORAGE)
        r.fail(SL_EINPUT, DoseReader::name(DCM_SOPClassUID),
               cls.empty() ? "missing: not a DICOM composite object"
                           : "'" + cls + "' is not RT Dose Storage (" + UID_RTDOSE_STORAGE + ")");
    d->sop_instance_uid = r.cstr(r.str_req(ds, DCM_SOPInstanceUID));
    d->study_uid = r.cstr(r.str(ds, DCM_StudyInstanceUID));
    d->frame_uid = r.cstr(r.str_req(ds, DCM_FrameOfReferenceUID));

    std::string units = r.str_req(ds, DCM_DoseUnits);
    if (units != "GY")
        r.fail(SL_EINPUT, DoseReader::name(DCM_DoseUnits),
               "'" + units + "': only absolute dose (GY) can be combined with the estimate");
    std::string type = r.str_req(ds, DCM_DoseType);
    if (type != "PHYSICAL")
        r.fail(SL_EINPUT, DoseReader::name(DCM_DoseType),
               "'" + type + "': only PHYSICAL dose is read");
    std::string sum = r.str_req(ds, DCM_DoseSummationType);
    if (sum == "PLAN")
        d->summation = SL_RTDOSE_PLAN;
    else if (sum == "BEAM")
        d->summation = SL_RTDOSE_BEAM;
    else
        r.fail(SL_EINPUT, DoseReader::name(DCM_DoseSummationType),
               "'" + sum + "': only PLAN and BEAM summations are read");

    DcmSequenceOfItems *plans = nullptr;
    if (ds->findAndGetSequence(DCM_ReferencedRTPlanSequence, plans).bad() || !plans ||
        plans->card() != 1)
        r.fail(SL_EINPUT, DoseReader::name(DCM_ReferencedRTPlanSequence),
               "must hold exactly one item (the plan this dose was computed for)");
    DcmItem *pi = plans->getItem(0);
    const std::string pctx = DoseReader::name(DCM_ReferencedRTPlanSequence) + " item 1";
    d->plan_uid = r.cstr(r.str_req(pi, DCM_ReferencedSOPInstanceUID, pctx));
    if (d->summation == SL_RTDOSE_BEAM) {
        DcmSequenceOfItems *fgs = nullptr;
        if (pi->findAndGetSequence(DCM_ReferencedFractionGroupSequence, fgs).bad() || !fgs ||
            fgs->card() != 1)
            r.fail(SL_EINPUT, DoseReader::name(DCM_ReferencedFractionGroupSequence, pctx),
                   "a BEAM dose must name one fraction group and its beams");
        DcmSequenceOfItems *bs = nullptr;
        DcmItem *fg = fgs->getItem(0);
        const std::string fctx =
            DoseReader::name(DCM_ReferencedFractionGroupSequence, pctx) + " item 1";
        if (fg->findAndGetSequence(DCM_ReferencedBeamSequence, bs).bad() || !bs ||
            bs->card() == 0 || bs->card() > 1000)
            r.fail(SL_EINPUT, DoseReader::name(DCM_ReferencedBeamSequence, fctx),
                   "a BEAM dose must name its beams");
        d->beams = static_cast<int *>(calloc(bs->card(), sizeof(int)));
        if (!d->beams)
            r.fail(SL_ENOMEM, "", "out of memory");
        for (DcmObject *o = bs->nextInContainer(nullptr); o; o = bs->nextInContainer(o)) {
            DcmItem *bi = static_cast<DcmItem *>(o);
            Sint32 num = 0;
            if (bi->findAndGetSint32(DCM_ReferencedBeamNumber, num).bad())
                r.fail(SL_EINPUT, DoseReader::name(DCM_ReferencedBeamNumber, fctx),
                       "missing or not an integer");
            d->beams[d->nbeams++] = static_cast<int>(num);
        }
    }

    long spp = r.uint_req(ds, DCM_SamplesPerPixel, 1, 1);
    (void)spp;
    long bits = r.uint_req(ds, DCM_BitsAllocated, 16, 32);
    if (bits != 16 && bits != 32)
        r.fail(SL_EINPUT, DoseReader::name(DCM_BitsAllocated), "must be 16 or 32");
    long stored = r.uint_req(ds, DCM_BitsStored, 1, bits);
    long high = r.uint_req(ds, DCM_HighBit, 0, bits - 1);
    if (high != stored - 1)
        r.fail(SL_EINPUT, DoseReader::name(DCM_HighBit), "must be Bits Stored - 1");
    long sign = r.uint_req(ds, DCM_PixelRepresentation, 0, 1);
    d->ny = static_cast<size_t>(r.uint_req(ds, DCM_Rows, 1, 65535));
    d->nx = static_cast<size_t>(r.uint_req(ds, DCM_Columns, 1, 65535));
    d->nz = static_cast<size_t>(r.uint_req(ds, DCM_NumberOfFrames, 1, 65535));
    if (d->nx * d->ny * d->nz > SL_RTDOSE_MAX_VOXELS)
        r.fail(SL_EINPUT, DoseReader::name(DCM_NumberOfFrames),
               "a grid of more than " + std::to_string(SL_RTDOSE_MAX_VOXELS) +
                   " voxels is larger than strayline reads");

    std::vector<double> ps = r.ds(ds, DCM_PixelSpacing);
    if (ps.size() != 2 || !(ps[0] > 0) || !(ps[1] > 0) || ps[0] > 1000 || ps[1] > 1000)
        r.fail(SL_EINPUT, DoseReader::name(DCM_PixelSpacing),
               "expected two positive spacings (mm) between rows and between columns");
    d->dy_mm = ps[0]; /* PS3.3 C.7.6.2.1.1: row spacing first */
    d->dx_mm = ps[1];
    std::vector<double> ipp = r.ds(ds, DCM_ImagePositionPatient);
    if (ipp.size() != 3)
        r.fail(SL_EINPUT, DoseReader::name(DCM_ImagePositionPatient),
               "expected three coordinates (mm)");
    for (double v : ipp)
        if (!(std::fabs(v) < 1e5))
            r.fail(SL_EINPUT, DoseReader::name(DCM_ImagePositionPatient), "an absurd coordinate");
    std::vector<double> iop = r.ds(ds, DCM_ImageOrientationPatient);
    const double axial[6] = {1, 0, 0, 0, 1, 0};
    bool ok = iop.size() == 6;
    for (size_t k = 0; ok && k < 6; k++)
        ok = std::fabs(iop[k] - axial[k]) < 1e-4;
    if (!ok)
        r.fail(SL_EINPUT, DoseReader::name(DCM_ImageOrientationPatient),
               "only axial grids with rows along +x and columns along +y (1\\0\\0\\0\\1\\0) "
               "are read");
    d->x0_mm = ipp[0];
    d->y0_mm = ipp[1];

    std::vector<double> gfov = r.ds(ds, DCM_GridFrameOffsetVector);
    if (gfov.size() != d->nz)
        r.fail(SL_EINPUT, DoseReader::name(DCM_GridFrameOffsetVector),
               "has " + std::to_string(gfov.size()) + " offsets for " +
                   std::to_string(d->nz) + " frames");
    /* PS3.3 C.8.8.3.2: offsets relative to Image Position (Patient) when
     * the first is 0, else absolute z coordinates (the first then equals
     * the position's z) */
    bool relative = gfov[0] == 0;
    if (!relative && std::fabs(gfov[0] - ipp[2]) > 1e-3)
        r.fail(SL_EINPUT, DoseReader::name(DCM_GridFrameOffsetVector),
               "neither relative (first offset 0) nor absolute (first offset the z of Image "
               "Position (Patient))");
    d->z_mm = static_cast<double *>(malloc(d->nz * sizeof(double)));
    if (!d->z_mm)
        r.fail(SL_ENOMEM, "", "out of memory");
    for (size_t k = 0; k < d->nz; k++) {
        d->z_mm[k] = relative ? ipp[2] + gfov[k] : gfov[k];
        if (k > 0 && !((d->z_mm[k] - d->z_mm[k - 1]) * (d->z_mm[1] - d->z_mm[0]) > 0))
            r.fail(SL_EINPUT, DoseReader::name(DCM_GridFrameOffsetVector),
                   "the frames are not strictly in order");
    }

    std::vector<double> scale = r.ds(ds, DCM_DoseGridScaling);
    if (scale.size() != 1 || !(scale[0] > 0) || !std::isfinite(scale[0]))
        r.fail(SL_EINPUT, DoseReader::name(DCM_DoseGridScaling),
               "missing or not one positive number");

    DcmElement *px = nullptr;
    if (ds->findAndGetElement(DCM_PixelData, px).bad() || !px)
        r.fail(SL_EINPUT, DoseReader::name(DCM_PixelData), "missing");
    /* compressed frames are not read: said so, not as a short element */
    DcmXfer tx(xfer);
    if (tx.isEncapsulated())
        r.fail(SL_EINPUT, DoseReader::name(DCM_PixelData),
               std::string("compressed (transfer syntax ") + tx.getXferName() + ", " +
                   tx.getXferID() +
                   "): strayline reads an RT Dose in an uncompressed transfer syntax; export "
                   "it uncompressed");
    size_t n = d->nx * d->ny * d->nz;
    Uint16 *words = nullptr;
    if (px->getUint16Array(words).bad() || !words ||
        px->getLength() < n * static_cast<size_t>(bits / 8))
        r.fail(SL_EINPUT, DoseReader::name(DCM_PixelData),
               "holds fewer values than Rows x Columns x Number of Frames");
    d->gy = static_cast<float *>(malloc(n * sizeof(float)));
    if (!d->gy)
        r.fail(SL_ENOMEM, "", "out of memory");
    /* 32-bit values come as two words: low word first in little-endian
     * files, high first in big-endian ones (DCMTK swaps within words) */
    bool big = xfer == EXS_BigEndianExplicit;
    double mx = 0;
    for (size_t i = 0; i < n; i++) {
        double v;
        if (bits == 16) {
            v = sign ? static_cast<double>(static_cast<Sint16>(words[i])) : words[i];
        } else {
            Uint32 lo = words[2 * i + (big ? 1 : 0)], hi = words[2 * i + (big ? 0 : 1)];
            Uint32 u = lo | (hi << 16);
            v = sign ? static_cast<double>(static_cast<Sint32>(u)) : u;
        }
        if (stored < bits && !sign)
            v = static_cast<double>(static_cast<Uint32>(v) & ((1u << stored) - 1));
        v *= scale[0];
        if (v < 0)
            r.fail(SL_EINPUT, DoseReader::name(DCM_PixelData), "a negative dose");
        d->gy[i] = static_cast<float>(v);
        mx = v > mx ? v : mx;
    }
    d->max_gy = mx;
}

} // namespace

extern "C" {

sl_status sl_rtdose_read(const char *path, sl_rtdose **out, sl_error *err)
{
    quiet();
    *out = nullptr;
    struct stat sb;
    if (stat(path, &sb) != 0)
        return sl_error_set(err, SL_EINPUT, "%s: cannot open: %s", path, strerror(errno));
    if (!S_ISREG(sb.st_mode) || sb.st_size == 0)
        return sl_error_set(err, SL_EINPUT, "%s: not a regular, non-empty file", path);
    if (static_cast<unsigned long long>(sb.st_size) > ((unsigned long long)1 << 31))
        return sl_error_set(err, SL_EINPUT, "%s: larger than strayline reads", path);
    sl_rtdose *d = static_cast<sl_rtdose *>(calloc(1, sizeof *d));
    if (!d)
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    d->source = static_cast<char *>(malloc(strlen(path) + 1));
    if (!d->source) {
        free(d);
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    }
    strcpy(d->source, path);
    DoseReader r(path, err);
    sl_status st = SL_OK;
    try {
        DcmFileFormat ff;
        OFCondition c = ff.loadFile(path, EXS_Unknown, EGL_noChange, OFstatic_cast(Uint32, -1),
                                    ERM_autoDetect);
        if (c.bad())
            r.fail(SL_EINPUT, "",
                   std::string("not a readable DICOM file, or cut short (DCMTK: ") + c.text() +
                       ")");
        DcmDataset *ds = ff.getDataset();
        if (!ds)
            r.fail(SL_EINPUT, "", "no DICOM data set in the file");
        read_dose(r, ds, ds->getOriginalXfer(), d);
    } catch (const failure &f) {
        st = f.code;
    } catch (const std::bad_alloc &) {
        st = sl_error_set(err, SL_ENOMEM, "%s: out of memory", path);
    } catch (...) {
        st = sl_error_set(err, SL_EINTERNAL, "%s: unexpected failure in DCMTK", path);
    }
    if (st != SL_OK) {
        sl_rtdose_free(d);
        return st;
    }
    *out = d;
    return SL_OK;
}

static void put(DcmDataset *ds, const DcmTagKey &key, const std::string &v)
{
    if (ds->putAndInsertString(key, v.c_str()).bad())
        throw failure{SL_EINTERNAL};
}

static std::string fmt(double v)
{
    char b[32];
    snprintf(b, sizeof b, "%.6g", v); /* at most 16 characters for a DS */
    return b;
}

sl_status sl_rtdose_write(const char *path, const char *plan_path, const sl_dose_grid *g,
                          const char *comment, sl_error *err)
{
    quiet();
    try {
        DcmFileFormat pf;
        if (pf.loadFile(plan_path).bad())
            return sl_error_set(err, SL_EINPUT, "%s: cannot be read again for its patient and "
                                                "study",
                                plan_path);
        DcmDataset *plan = pf.getDataset();
        auto copy = [&](const DcmTagKey &k) {
            OFString v;
            plan->findAndGetOFStringArray(k, v);
            return std::string(v.c_str());
        };
        std::string frame = copy(DCM_FrameOfReferenceUID), study = copy(DCM_StudyInstanceUID),
                    plan_uid = copy(DCM_SOPInstanceUID);
        if (frame.empty() || study.empty() || plan_uid.empty())
            return sl_error_set(err, SL_EINPUT,
                                "%s: the plan has no Frame of Reference, Study Instance or SOP "
                                "Instance UID to give the dose",
                                plan_path);
        DcmFileFormat ff;
        DcmDataset *ds = ff.getDataset();
        char uid[100];
        std::string sop = dcmGenerateUniqueIdentifier(uid, SITE_INSTANCE_UID_ROOT);
        std::string series = dcmGenerateUniqueIdentifier(uid, SITE_SERIES_UID_ROOT);
        put(ds, DCM_SpecificCharacterSet, "ISO_IR 192");
        put(ds, DCM_SOPClassUID, UID_RTDOSE_STORAGE);
        put(ds, DCM_SOPInstanceUID, sop);
        /* Patient and General Study: the plan's */
        const DcmTagKey same[] = {DCM_PatientName,   DCM_PatientID,     DCM_PatientBirthDate,
                                  DCM_PatientSex,    DCM_StudyInstanceUID, DCM_StudyDate,
                                  DCM_StudyTime,     DCM_ReferringPhysicianName, DCM_StudyID,
                                  DCM_AccessionNumber};
        for (const DcmTagKey &k : same)
            put(ds, k, copy(k));
        put(ds, DCM_Modality, "RTDOSE");
        put(ds, DCM_SeriesInstanceUID, series);
        put(ds, DCM_SeriesNumber, "1");
        put(ds, DCM_OperatorsName, "");
        put(ds, DCM_SeriesDescription, "strayline screening estimate");
        put(ds, DCM_FrameOfReferenceUID, frame);
        put(ds, DCM_PositionReferenceIndicator, copy(DCM_PositionReferenceIndicator));
        put(ds, DCM_Manufacturer, "strayline");
        put(ds, DCM_InstanceNumber, "1");
        put(ds, DCM_ImagePositionPatient,
            fmt(g->x0_mm) + "\\" + fmt(g->y0_mm) + "\\" + fmt(g->z0_mm));
        put(ds, DCM_ImageOrientationPatient, "1\\0\\0\\0\\1\\0");
        put(ds, DCM_PixelSpacing, fmt(g->step_mm) + "\\" + fmt(g->step_mm));
        put(ds, DCM_SliceThickness, fmt(g->step_mm));
        put(ds, DCM_SamplesPerPixel, "1");
        put(ds, DCM_PhotometricInterpretation, "MONOCHROME2");
        put(ds, DCM_Rows, std::to_string(g->ny));
        put(ds, DCM_Columns, std::to_string(g->nx));
        put(ds, DCM_BitsAllocated, "16");
        put(ds, DCM_BitsStored, "16");
        put(ds, DCM_HighBit, "15");
        put(ds, DCM_PixelRepresentation, "0");
        put(ds, DCM_NumberOfFrames, std::to_string(g->nz));
        if (ds->putAndInsertTagKey(DCM_FrameIncrementPointer, DCM_GridFrameOffsetVector).bad())
            throw failure{SL_EINTERNAL};
        put(ds, DCM_DoseUnits, "GY");
        put(ds, DCM_DoseType, "PHYSICAL");
        /* Dose Comment is LO (64 characters): the fixed words; the rest in
         * the General Image module's Image Comments (LT) */
        put(ds, DCM_DoseComment, "screening estimate, not a planning dose");
        put(ds, DCM_ImageComments, comment);
        put(ds, DCM_DoseSummationType, "PLAN");
        std::string offsets;
        for (size_t k = 0; k < g->nz; k++)
            offsets += (k ? "\\" : "") + fmt((double)k * g->step_mm);
        put(ds, DCM_GridFrameOffsetVector, offsets);
        size_t n = g->nx * g->ny * g->nz;
        double mx = 0;
        for (size_t i = 0; i < n; i++)
            mx = g->gy[i] > mx ? g->gy[i] : mx;
        /* 16-bit values (PS3.3 allows 16 or 32; the 32-bit form is not
         * checked by dicom3tools' dciodvfy, which this file must pass): the
         * largest dose at the top of the range, and every value rounded UP
         * to a step, so that the file never shows less than the estimate.
         * Dose Grid Scaling is a DS of at most 16 characters: it is rounded
         * up to 6 significant digits first and the values scaled by that. */
        double scale = mx > 0 ? mx / 65000.0 : 1e-9;
        scale = std::stod(fmt(scale * 1.000001));
        put(ds, DCM_DoseGridScaling, fmt(scale));
        DcmItem *ref = nullptr;
        if (ds->findOrCreateSequenceItem(DCM_ReferencedRTPlanSequence, ref, 0).bad() || !ref ||
            ref->putAndInsertString(DCM_ReferencedSOPClassUID, UID_RTPlanStorage).bad() ||
            ref->putAndInsertString(DCM_ReferencedSOPInstanceUID, plan_uid.c_str()).bad())
            throw failure{SL_EINTERNAL};
        std::vector<Uint16> words(n);
        for (size_t i = 0; i < n; i++) {
            double q = std::ceil(g->gy[i] / scale - 1e-9);
            words[i] = static_cast<Uint16>(q < 0 ? 0 : q > 65535 ? 65535 : q);
        }
        if (ds->putAndInsertUint16Array(DCM_PixelData, words.data(), n).bad())
            throw failure{SL_EINTERNAL};
        OFCondition c = ff.saveFile(path, EXS_LittleEndianExplicit);
        if (c.bad())
            return sl_error_set(err, SL_EINPUT, "%s: cannot write: %s", path, c.text());
    } catch (const failure &) {
        return sl_error_set(err, SL_EINTERNAL, "%s: DCMTK refused an element of the RT Dose",
                            path);
    } catch (const std::bad_alloc &) {
        return sl_error_set(err, SL_ENOMEM, "out of memory writing %s", path);
    } catch (...) {
        return sl_error_set(err, SL_EINTERNAL, "%s: unexpected failure in DCMTK", path);
    }
    return SL_OK;
}

} // extern "C"
