/*
 * The DICOM bridge: RT Plan and RT Structure Set reading through DCMTK's
 * dcmdata, copied into the plain C structs of plan.h and structures.h.
 *
 * This is the only translation unit that includes DCMTK headers (DCMTK needs
 * C++17). It uses dcmdata's generic item access rather than the dcmrt IOD
 * classes so that every missing or malformed element can be reported with
 * its keyword, tag and position in the sequence tree, instead of a generic
 * "invalid object". Memory handed to C is allocated with malloc and freed by
 * sl_plan_free / sl_structure_set_free; nothing thrown crosses the C API.
 */
#include "strayline/dicom.h"
#include "strayline/util.h"
#include "contour_points.h"
#include "raw_file.h"
#include "ds_value.h"
#include "strayline/parallel.h"

#include <dcmtk/config/osconfig.h>
#include <dcmtk/dcmdata/dcdeftag.h>
#include <dcmtk/dcmdata/dcfilefo.h>
#include <dcmtk/dcmdata/dcuid.h>
#include <dcmtk/dcmdata/dcvrds.h>
#include <dcmtk/dcmdata/dcvris.h>
#include <dcmtk/dcmdata/dcxfer.h>
#include <dcmtk/oflog/oflog.h>

#include <cctype>
#include <cfloat>
#include <charconv>
#include <cerrno>
#include <cmath>
#include <cstdlib>
#include <cstring>
#include <strings.h>
#include <mutex>
#include <new>
#include <string>
#include <unordered_map>
#include <algorithm>
#include <fcntl.h>
#include <pthread.h>
#include <sys/mman.h>
#include <sys/stat.h>
#include <unistd.h>
#include <vector>
#include <zlib.h>

using namespace sl_dicom_internal;

namespace {

using sl_dicom_internal::ds_convert;
using sl_dicom_internal::ds_delimiters;

const char *const UID_RTPLAN = "1.2.840.10008.5.1.4.1.1.481.5";
const char *const UID_RTSTRUCT = "1.2.840.10008.5.1.4.1.1.481.3";
const char *const UID_RTIONPLAN = "1.2.840.10008.5.1.4.1.1.481.8";

/* DCMTK logs through oflog; a library must not print, so silence it once. */
void quiet_dcmtk()
{
    static std::once_flag once;
    std::call_once(once, [] {
        OFLog::configure(OFLogger::FATAL_LOG_LEVEL);
        /* Dense contours written in explicit VR arrive as UN (a value over
         * 64 KiB cannot be OB-less DS there): read known tags with their
         * dictionary VR, so that the result does not depend on the encoding. */
        dcmEnableUnknownVRConversion.set(OFTrue);
    });
}

/* An Integer String value: optional spaces, an optional sign, digits; the
 * value must fit a signed 32-bit integer (PS3.5 6.2). */
bool is_grammar(const std::string &v, long long &out)
{
    size_t b = v.find_first_not_of(' '), e = v.find_last_not_of(' ');
    if (b == std::string::npos)
        return false;
    std::string core = v.substr(b, e - b + 1);
    size_t i = core[0] == '+' || core[0] == '-' ? 1 : 0;
    if (i == core.size() || core.size() - i > 12)
        return false;
    for (size_t k = i; k < core.size(); k++) {
        if (!isdigit(static_cast<unsigned char>(core[k])))
            return false;
    }
    out = strtoll(core.c_str(), nullptr, 10);
    return out >= -2147483648LL && out <= 2147483647LL;
}

/* Error raised inside the reader; caught at the C boundary. */
struct read_failure {
    sl_status code;
};

class Reader {
public:
    Reader(const char *file, sl_error *err) : file_(file ? file : "(buffer)"), err_(err) {}

    [[noreturn]] void fail(sl_status code, const std::string &where, const std::string &what)
    {
        if (where.empty())
            sl_error_set(err_, code, "%s: %s", file_, what.c_str());
        else
            sl_error_set(err_, code, "%s: %s: %s", file_, where.c_str(), what.c_str());
        throw read_failure{code};
    }

    static std::string tag_name(const DcmTagKey &key)
    {
        DcmTag tag(key);
        char buf[32];
        snprintf(buf, sizeof buf, "(%04X,%04X)", key.getGroup(), key.getElement());
        return std::string(tag.getTagName()) + " " + buf;
    }

    static std::string at(const std::string &ctx, const DcmTagKey &key)
    {
        return ctx.empty() ? tag_name(key) : ctx + " > " + tag_name(key);
    }

    /* The element's value as one string (multiple values joined by '\'),
     * or empty when the element is absent or empty. */
    std::string str(DcmItem *item, const DcmTagKey &key)
    {
        OFString v;
        if (item->findAndGetOFStringArray(key, v).bad())
            return std::string();
        std::string s(v.c_str());
        size_t b = s.find_first_not_of(' ');
        size_t e = s.find_last_not_of(' ');
        if (b == std::string::npos)
            return std::string();
        return s.substr(b, e - b + 1);
    }

    std::string str_req(DcmItem *item, const DcmTagKey &key, const std::string &ctx)
    {
        std::string s = str(item, key);
        if (s.empty())
            fail(SL_EINPUT, at(ctx, key), "missing or empty");
        return s;
    }

    /* A malloc'd copy for the C structs; NULL for an empty value. */
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

    bool has(DcmItem *item, const DcmTagKey &key)
    {
        DcmElement *el = nullptr;
        return item->findAndGetElement(key, el).good() && el && el->getLength() > 0;
    }

    /* Every value of a DS element, from its raw characters read once: each
     * value checked against the DS grammar and converted where it lies, with
     * no copy and no allocation per number (a structure set holds millions).
     * The count of values is DCMTK's (delimiters + 1 over the raw value), so
     * that a value lost to stray padding is still an error. begin(count) is
     * called once before put(i, value) for each value. */
    template <typename Where, typename Begin, typename Put>
    void ds_each(DcmElement *el, Where where, Begin begin, Put put)
    {
        char *chars = nullptr;
        Uint32 nchars = 0;
        if (el->getString(chars, nchars).bad() || (!chars && nchars))
            fail(SL_EINPUT, where(), "cannot read the values");
        if (!chars || nchars == 0) {
            begin(static_cast<size_t>(0));
            return;
        }
        const char *s = chars, *end = chars + nchars;
        size_t vm = 1 + ds_delimiters(s, end);
        if (vm > 100000000UL)
            fail(SL_EINPUT, where(), "too many values");
        while (end > s && (end[-1] == ' ' || end[-1] == '\0'))
            end--; /* the padding to an even length */
        begin(vm);
        const char *b = s;
        for (size_t i = 0; i < vm; i++) {
            const char *q = static_cast<const char *>(memchr(b, '\\', static_cast<size_t>(end - b)));
            if (!q)
                q = end;
            if (i + 1 < vm && q == end)
                fail(SL_EINPUT, where(), "could not read every value");
            double d;
            if (!ds_convert(b, q, d)) {
                std::string v(b, static_cast<size_t>(q - b));
                std::string shown = v.size() > 40 ? v.substr(0, 40) + "..." : v;
                fail(SL_EINPUT, where(),
                     "value " + std::to_string(i + 1) + " '" + shown +
                         "' is not a decimal string (DS: optional sign, digits, decimal point, "
                         "exponent)");
            }
            put(i, d);
            b = q < end ? q + 1 : end;
        }
    }

    /* Contour Data straight into (x, y, z) points: no vector of doubles in
     * between, whose pages would be touched twice. *count receives the
     * number of values; the points (count / 3 rounded up, malloc'd, NULL for
     * none) are owned by the caller as soon as they are handed over through
     * `own`, so that they are freed whatever fails next. Another VR than DS
     * goes through nums(). Points already converted in `batch` are taken
     * from it. */
    template <typename Own>
    void contour_data(DcmItem *item, const std::string &ctx, size_t *count, Own own,
                      sl_dicom_internal::contour_batch *batch = nullptr)
    {
        DcmElement *el = nullptr;
        *count = 0;
        if (item->findAndGetElement(DCM_ContourData, el).bad() || !el || el->getLength() == 0)
            return;
        sl_vec3 *ready = nullptr;
        if (batch && batch->take(el, &ready, count)) {
            own(ready);
            return;
        }
        auto where = [&]() { return at(ctx, DCM_ContourData); };
        sl_vec3 *pts = nullptr;
        auto begin = [&](size_t vm) {
            *count = vm;
            if (vm == 0)
                return;
            pts = static_cast<sl_vec3 *>(malloc((vm + 2) / 3 * sizeof(sl_vec3)));
            if (!pts)
                fail(SL_ENOMEM, "", "out of memory");
            own(pts);
        };
        if (el->ident() == EVR_DS) {
            ds_each(el, where, begin, [&](size_t i, double d) {
                sl_vec3 &p = pts[i / 3];
                switch (i % 3) {
                case 0: p.x = d; break;
                case 1: p.y = d; break;
                default: p.z = d; break;
                }
            });
            return;
        }
        std::vector<double> v = nums(item, DCM_ContourData, ctx);
        begin(v.size());
        for (size_t i = 0; i < v.size(); i++) {
            sl_vec3 &p = pts[i / 3];
            (i % 3 == 0 ? p.x : i % 3 == 1 ? p.y : p.z) = v[i];
        }
    }

    /* All numeric values of an element (DS, IS, FD, FL, US, SS, UL, SL). */
    std::vector<double> nums(DcmItem *item, const DcmTagKey &key, const std::string &ctx)
    {
        std::vector<double> out;
        DcmElement *el = nullptr;
        if (item->findAndGetElement(key, el).bad() || !el || el->getLength() == 0)
            return out;
        /* the element's place in messages, built only for a message: the
         * dictionary lookup behind it would otherwise run for every contour */
        auto where = [&]() { return at(ctx, key); };
        DcmEVR vr = el->ident();
        if (vr == EVR_DS) {
            ds_each(
                el, where, [&](size_t vm) { out.reserve(vm); },
                [&](size_t, double d) { out.push_back(d); });
            return out;
        }
        unsigned long vm = el->getVM();
        if (vm > 100000000UL)
            fail(SL_EINPUT, where(), "too many values");
        if (vr == EVR_IS) {
            /* every value read whole and strictly: a value that merely starts
             * like a number ("1e2" as an IS, "3 50", "45deg", "1,5") must not
             * become one */
            /* the whole value once, split here: getOFString(s, i) rescans
             * the value for each i, quadratic over a dense contour */
            char *chars = nullptr;
            Uint32 nchars = 0;
            if (el->getString(chars, nchars).bad() || (!chars && nchars))
                fail(SL_EINPUT, where(), "cannot read the values");
            std::string all(chars ? chars : "", chars ? nchars : 0);
            while (!all.empty() && (all.back() == ' ' || all.back() == '\0'))
                all.pop_back(); /* the padding to an even length */
            out.reserve(vm);
            size_t from = 0;
            for (unsigned long i = 0; i < vm; i++) {
                size_t to = all.find('\\', from);
                if (to == std::string::npos)
                    to = all.length();
                if (i + 1 < vm && to == all.length())
                    fail(SL_EINPUT, where(), "could not read every value");
                std::string v(all.c_str() + from, to - from);
                from = to + 1;
                std::string shown = v.size() > 40 ? v.substr(0, 40) + "..." : v;
                long long k;
                if (!is_grammar(v, k))
                    fail(SL_EINPUT, where(),
                         "value " + std::to_string(i + 1) + " '" + shown +
                             "' is not an integer string (IS: optional sign and digits, "
                             "-2147483648 to 2147483647)");
                out.push_back(static_cast<double>(k));
            }
        } else {
            out.reserve(vm);
            for (unsigned long i = 0; i < vm; i++) {
                OFCondition c;
                double d = 0;
                switch (vr) {
                case EVR_FD: {
                    Float64 f;
                    c = el->getFloat64(f, i);
                    d = f;
                    break;
                }
                case EVR_FL: {
                    Float32 f;
                    c = el->getFloat32(f, i);
                    d = f;
                    break;
                }
                case EVR_US: {
                    Uint16 u;
                    c = el->getUint16(u, i);
                    d = u;
                    break;
                }
                case EVR_SS: {
                    Sint16 s;
                    c = el->getSint16(s, i);
                    d = s;
                    break;
                }
                case EVR_UL: {
                    Uint32 u;
                    c = el->getUint32(u, i);
                    d = u;
                    break;
                }
                case EVR_SL: {
                    Sint32 s;
                    c = el->getSint32(s, i);
                    d = s;
                    break;
                }
                default:
                    fail(SL_EINPUT, where(), std::string("has value representation ") +
                                               DcmVR(vr).getVRName() + ", expected a number");
                }
                if (c.bad())
                    fail(SL_EINPUT, where(), "not a valid number");
                out.push_back(d);
            }
        }
        for (double d : out) {
            if (!std::isfinite(d))
                fail(SL_EINPUT, where(), "value is not a finite number");
        }
        return out;
    }

    /* One number. Absent: NAN when optional, an error when required. */
    double num(DcmItem *item, const DcmTagKey &key, const std::string &ctx, bool required)
    {
        std::vector<double> v = nums(item, key, ctx);
        if (v.empty()) {
            if (required)
                fail(SL_EINPUT, at(ctx, key), "missing or empty");
            return NAN;
        }
        if (v.size() != 1)
            fail(SL_EINPUT, at(ctx, key),
                 "expected one value, found " + std::to_string(v.size()));
        return v[0];
    }

    int integer(DcmItem *item, const DcmTagKey &key, const std::string &ctx, bool required,
                int absent = -1)
    {
        double d = num(item, key, ctx, required);
        if (std::isnan(d))
            return absent;
        if (d != std::floor(d) || d < -2147483648.0 || d > 2147483647.0)
            fail(SL_EINPUT, at(ctx, key), "not an integer");
        return static_cast<int>(d);
    }

    /* Items of a sequence; empty when absent (an error when required). */
    std::vector<DcmItem *> seq(DcmItem *item, const DcmTagKey &key, const std::string &ctx,
                               bool required)
    {
        std::vector<DcmItem *> out;
        DcmSequenceOfItems *sq = nullptr;
        if (item->findAndGetSequence(key, sq).good() && sq) {
            /* walk the list: getItem(i) seeks from the start, which is
             * quadratic over a sequence of tens of thousands of items */
            out.reserve(sq->card());
            for (DcmObject *o = sq->nextInContainer(nullptr); o; o = sq->nextInContainer(o))
                out.push_back(static_cast<DcmItem *>(o));
        }
        if (required && out.empty())
            fail(SL_EINPUT, at(ctx, key), "missing or empty sequence");
        return out;
    }

    const char *file() const { return file_; }

private:
    const char *file_;
    sl_error *err_;
};

template <typename T> T *alloc_array(Reader &r, size_t n)
{
    if (n == 0)
        return nullptr;
    T *p = static_cast<T *>(calloc(n, sizeof(T)));
    if (!p)
        r.fail(SL_ENOMEM, "", "out of memory");
    return p;
}

void check_angle(Reader &r, double v, const std::string &where)
{
    if (!(v >= 0.0 && v <= 360.0) && !(v > -360.0 && v < 0.0))
        r.fail(SL_EINPUT, where, "angle " + std::to_string(v) + " deg is outside 0..360");
    (void)r;
}

/* ---------------------------------------------------------------- plan -- */

void read_block(Reader &r, DcmItem *it, const std::string &ctx, sl_block *b)
{
    b->number = r.integer(it, DCM_BlockNumber, ctx, false, 0);
    b->name = r.cstr(r.str(it, DCM_BlockName));
    b->tray_id = r.cstr(r.str(it, DCM_BlockTrayID));
    std::string type = r.str_req(it, DCM_BlockType, ctx);
    if (type == "APERTURE")
        b->type = SL_BLOCK_APERTURE;
    else if (type == "SHIELDING")
        b->type = SL_BLOCK_SHIELDING;
    else
        r.fail(SL_EINPUT, Reader::at(ctx, DCM_BlockType),
               "unknown block type '" + type + "' (expected APERTURE or SHIELDING)");
    std::string div = r.str(it, DCM_BlockDivergence);
    b->divergent = div == "PRESENT" ? 1 : div == "ABSENT" ? 0 : -1;
    b->source_to_tray_mm = r.num(it, DCM_SourceToBlockTrayDistance, ctx, false);
    if (std::isfinite(b->source_to_tray_mm) && b->source_to_tray_mm <= 0)
        r.fail(SL_EINPUT, Reader::at(ctx, DCM_SourceToBlockTrayDistance), "must be positive");
    b->thickness_mm = r.num(it, DCM_BlockThickness, ctx, false);
    if (std::isfinite(b->thickness_mm) && b->thickness_mm < 0)
        r.fail(SL_EINPUT, Reader::at(ctx, DCM_BlockThickness), "negative thickness");
    b->transmission = r.num(it, DCM_BlockTransmission, ctx, false);
    if (std::isfinite(b->transmission) && (b->transmission < 0 || b->transmission > 1))
        r.fail(SL_EINPUT, Reader::at(ctx, DCM_BlockTransmission), "must lie between 0 and 1");
    b->material = r.cstr(r.str(it, DCM_MaterialID));
    int npts = r.integer(it, DCM_BlockNumberOfPoints, ctx, true);
    std::vector<double> data = r.nums(it, DCM_BlockData, ctx);
    if (data.empty())
        r.fail(SL_EINPUT, Reader::at(ctx, DCM_BlockData), "missing or empty");
    if (data.size() % 2 != 0)
        r.fail(SL_EINPUT, Reader::at(ctx, DCM_BlockData),
               "has " + std::to_string(data.size()) + " values, not a whole number of (x,y) pairs");
    if (npts < 0 || static_cast<size_t>(npts) * 2 != data.size())
        r.fail(SL_EINPUT, Reader::at(ctx, DCM_BlockNumberOfPoints),
               "says " + std::to_string(npts) + " points but Block Data holds " +
                   std::to_string(data.size() / 2));
    if (npts < 3)
        r.fail(SL_EINPUT, Reader::at(ctx, DCM_BlockData),
               "a block outline needs at least 3 points, found " + std::to_string(npts));
    b->npoints = static_cast<size_t>(npts);
    b->points = alloc_array<sl_vec2>(r, b->npoints);
    for (size_t i = 0; i < b->npoints; i++) {
        b->points[i].x = data[2 * i];
        b->points[i].y = data[2 * i + 1];
        if (std::fabs(data[2 * i]) > 1000.0 || std::fabs(data[2 * i + 1]) > 1000.0)
            r.fail(SL_EINPUT, Reader::at(ctx, DCM_BlockData),
                   "point " + std::to_string(i + 1) + " lies more than 1 m from the axis");
    }
}

void read_applicator(Reader &r, DcmItem *beam, const std::string &bctx, sl_applicator *a)
{
    a->opening_mm = a->opening_x_mm = a->opening_y_mm = NAN;
    a->source_to_applicator_mm = NAN;
    std::vector<DcmItem *> apps = r.seq(beam, DCM_ApplicatorSequence, bctx, false);
    if (apps.empty())
        return;
    if (apps.size() > 1)
        r.fail(SL_EINPUT, Reader::at(bctx, DCM_ApplicatorSequence),
               "holds " + std::to_string(apps.size()) + " applicators; one is expected");
    DcmItem *it = apps[0];
    std::string ctx = bctx + " > applicator";
    a->present = true;
    a->id = r.cstr(r.str_req(it, DCM_ApplicatorID, ctx));
    a->type = r.cstr(r.str_req(it, DCM_ApplicatorType, ctx));
    a->description = r.cstr(r.str(it, DCM_ApplicatorDescription));
    std::vector<DcmItem *> geo = r.seq(it, DCM_ApplicatorGeometrySequence, ctx, false);
    if (!geo.empty()) {
        std::string gctx = ctx + " > geometry";
        a->has_geometry = true;
        a->aperture_shape = r.cstr(r.str_req(geo[0], DCM_ApplicatorApertureShape, gctx));
        a->opening_mm = r.num(geo[0], DCM_ApplicatorOpening, gctx, false);
        a->opening_x_mm = r.num(geo[0], DCM_ApplicatorOpeningX, gctx, false);
        a->opening_y_mm = r.num(geo[0], DCM_ApplicatorOpeningY, gctx, false);
        for (double v : {a->opening_mm, a->opening_x_mm, a->opening_y_mm}) {
            if (std::isfinite(v) && (v <= 0 || v > 1000))
                r.fail(SL_EINPUT, gctx, "applicator opening " + std::to_string(v) +
                                            " mm is not a plausible size");
        }
    }
    a->source_to_applicator_mm =
        r.num(it, DCM_SourceToApplicatorMountingPositionDistance, ctx, false);
    if (std::isfinite(a->source_to_applicator_mm) && a->source_to_applicator_mm <= 0)
        r.fail(SL_EINPUT, Reader::at(ctx, DCM_SourceToApplicatorMountingPositionDistance),
               "must be positive");
}

void read_beam(Reader &r, DcmItem *it, size_t index, sl_beam *b, sl_plan *plan)
{
    std::string ctx0 = "beam item " + std::to_string(index + 1);
    b->number = r.integer(it, DCM_BeamNumber, ctx0, true);
    std::string ctx = "beam " + std::to_string(b->number);
    b->name = r.cstr(r.str(it, DCM_BeamName));
    b->description = r.cstr(r.str(it, DCM_BeamDescription));
    b->radiation_type = r.cstr(r.str_req(it, DCM_RadiationType, ctx));
    std::string delivery = r.str(it, DCM_TreatmentDeliveryType);
    b->delivery_type = r.cstr(delivery.empty() ? std::string("TREATMENT") : delivery);
    const bool electron = strcmp(b->radiation_type, "ELECTRON") == 0;
    /* a code string is upper case (PS3.5 6.2, CS): "electron" would pass as
     * another kind of beam, its organs incomplete and its listing wrong */
    if (!electron && strcasecmp(b->radiation_type, "ELECTRON") == 0)
        r.fail(SL_EINPUT, Reader::at(ctx, DCM_RadiationType),
               "'" + std::string(b->radiation_type) +
                   "' is not a Radiation Type: a code string is upper case (ELECTRON)");
    if (delivery.empty() && electron &&
        sl_notes_add(&plan->notes,
                     "%s: %s: Treatment Delivery Type (300A,00CE) absent: taken as TREATMENT",
                     r.file(), ctx.c_str()) != SL_OK)
        r.fail(SL_ENOMEM, "", "out of memory");
    /* Only electron beams are placed, so only they must carry full geometry;
     * other beams are read for the listing and skipped. */
    b->beam_type = r.cstr(electron ? r.str_req(it, DCM_BeamType, ctx) : r.str(it, DCM_BeamType));
    b->machine = r.cstr(r.str(it, DCM_TreatmentMachineName));
    /* the meterset is read as monitor units: a beam metered in minutes
     * (a cobalt or orthovoltage unit) would be scaled as MU without a word */
    std::string unit = r.str(it, DCM_PrimaryDosimeterUnit);
    if (electron && !unit.empty() && unit != "MU")
        r.fail(SL_EINPUT, Reader::at(ctx, DCM_PrimaryDosimeterUnit),
               "'" + unit + "': strayline reads an electron beam's meterset as monitor units (MU)");
    b->setup_number = r.integer(it, DCM_ReferencedPatientSetupNumber, ctx, false, -1);
    b->sad_mm = r.num(it, DCM_SourceAxisDistance, ctx, false);
    if (std::isnan(b->sad_mm)) {
        b->sad_mm = 1000.0;
        b->sad_defaulted = true;
        if (sl_notes_add(&plan->notes,
                         "%s: %s: Source-Axis Distance (300A,00B4) absent: 1000 mm assumed",
                         r.file(), ctx.c_str()) != SL_OK)
            r.fail(SL_ENOMEM, "", "out of memory");
    } else if (b->sad_mm < 500.0 || b->sad_mm > 2000.0) {
        r.fail(SL_EINPUT, Reader::at(ctx, DCM_SourceAxisDistance),
               std::to_string(b->sad_mm) + " mm is not a plausible source-axis distance");
    }

    std::vector<DcmItem *> cps = r.seq(it, DCM_ControlPointSequence, ctx, electron);
    int ncp = r.integer(it, DCM_NumberOfControlPoints, ctx, electron, static_cast<int>(cps.size()));
    if (ncp < 0 || static_cast<size_t>(ncp) != cps.size())
        r.fail(SL_EINPUT, Reader::at(ctx, DCM_NumberOfControlPoints),
               "says " + std::to_string(ncp) + " but the Control Point Sequence holds " +
                   std::to_string(cps.size()));
    b->ncontrol_points = cps.size();
    b->energy_mev = b->gantry_deg = b->collimator_deg = b->couch_deg = NAN;
    b->ssd_mm = NAN;
    b->eccentric_deg = 0.0;
    if (cps.empty())
        return;
    std::string cctx = ctx + " > control point 0";
    DcmItem *cp = cps[0];
    b->energy_mev = r.num(cp, DCM_NominalBeamEnergy, cctx, electron);
    if (std::isfinite(b->energy_mev) && (b->energy_mev <= 0.0 || b->energy_mev > 100.0))
        r.fail(SL_EINPUT, Reader::at(cctx, DCM_NominalBeamEnergy),
               std::to_string(b->energy_mev) + " MeV is not a plausible beam energy");
    b->gantry_deg = r.num(cp, DCM_GantryAngle, cctx, electron);
    b->collimator_deg = r.num(cp, DCM_BeamLimitingDeviceAngle, cctx, electron);
    b->couch_deg = r.num(cp, DCM_PatientSupportAngle, cctx, electron);
    b->eccentric_deg = r.num(cp, DCM_TableTopEccentricAngle, cctx, false);
    if (std::isnan(b->eccentric_deg)) {
        b->eccentric_deg = 0.0;
        if (electron &&
            sl_notes_add(&plan->notes,
                         "%s: %s: Table Top Eccentric Angle (300A,0125) absent: 0 deg assumed",
                         r.file(), ctx.c_str()) != SL_OK)
            r.fail(SL_ENOMEM, "", "out of memory");
    }
    const struct {
        double v;
        DcmTagKey k;
    } angles[] = {{b->gantry_deg, DCM_GantryAngle},
                  {b->collimator_deg, DCM_BeamLimitingDeviceAngle},
                  {b->couch_deg, DCM_PatientSupportAngle},
                  {b->eccentric_deg, DCM_TableTopEccentricAngle}};
    for (const auto &a : angles) {
        if (std::isfinite(a.v))
            check_angle(r, a.v, Reader::at(cctx, a.k));
    }
    /* table-top pitch and roll and gantry pitch tilt the patient against
     * the beam in ways the field placement does not model: a beam with any
     * of them is refused rather than placed as if they were zero */
    const struct {
        DcmTagKey k;
        const char *name;
    } tilts[] = {{DCM_TableTopPitchAngle, "table-top pitch"},
                 {DCM_TableTopRollAngle, "table-top roll"},
                 {DCM_GantryPitchAngle, "gantry pitch"}};
    for (const auto &t : tilts) {
        double v = r.num(cp, t.k, cctx, false);
        if (!electron || std::isnan(v))
            continue;
        check_angle(r, v, Reader::at(cctx, t.k));
        double a = std::fabs(std::remainder(v, 360.0));
        if (a > 0.05)
            r.fail(SL_EINPUT, Reader::at(cctx, t.k),
                   std::to_string(v) + " deg: " + t.name +
                       " is not modelled (only gantry, collimator, couch and table-top "
                       "eccentric angles are): the field would be placed wrongly");
    }
    /* a rotation during delivery is not modelled either: a static electron
     * beam states NONE, or nothing (found by an independent review: CW at
     * control point 0, not repeated later, was placed as static) */
    const struct {
        DcmTagKey k;
        const char *name;
    } turns[] = {{DCM_GantryRotationDirection, "gantry"},
                 {DCM_BeamLimitingDeviceRotationDirection, "collimator"},
                 {DCM_PatientSupportRotationDirection, "couch"},
                 {DCM_TableTopEccentricRotationDirection, "table-top eccentric"}};
    for (const auto &t : turns) {
        std::string v = r.str(cp, t.k);
        if (electron && !v.empty() && v != "NONE")
            r.fail(SL_EINPUT, Reader::at(cctx, t.k),
                   "'" + v + "': a " + t.name +
                       " rotation during delivery is not modelled (a static electron beam "
                       "states NONE): the field would be placed wrongly");
    }
    std::vector<double> iso = r.nums(cp, DCM_IsocenterPosition, cctx);
    if (!iso.empty()) {
        if (iso.size() != 3)
            r.fail(SL_EINPUT, Reader::at(cctx, DCM_IsocenterPosition),
                   "expected 3 values, found " + std::to_string(iso.size()));
        for (double v : iso) {
            if (std::fabs(v) > 1.0e5)
                r.fail(SL_EINPUT, Reader::at(cctx, DCM_IsocenterPosition),
                       "coordinate " + std::to_string(v) + " mm is absurd");
        }
        b->has_isocenter = true;
        b->isocenter_mm = sl_vec3{iso[0], iso[1], iso[2]};
    } else if (electron) {
        r.fail(SL_EINPUT, Reader::at(cctx, DCM_IsocenterPosition), "missing or empty");
    }
    /* Later control points of a static electron beam repeat or omit these
     * values; one that changes them describes a moving beam, which the first
     * control point alone would misplace. (Photon beams, arcs among them, are
     * only listed.) */
    const struct {
        double v;
        DcmTagKey k;
        const char *unit;
    } fixed[] = {{b->energy_mev, DCM_NominalBeamEnergy, "MeV"},
                 {b->gantry_deg, DCM_GantryAngle, "deg"},
                 {b->collimator_deg, DCM_BeamLimitingDeviceAngle, "deg"},
                 {b->couch_deg, DCM_PatientSupportAngle, "deg"},
                 {b->eccentric_deg, DCM_TableTopEccentricAngle, "deg"}};
    for (size_t k = 1; electron && k < cps.size(); k++) {
        std::string kctx = ctx + " > control point " + std::to_string(k);
        for (const auto &f : fixed) {
            double v = r.num(cps[k], f.k, kctx, false);
            if (!std::isnan(v) && !(std::fabs(v - f.v) <= 1e-6))
                r.fail(SL_EINPUT, Reader::at(kctx, f.k),
                       std::to_string(v) + " " + f.unit + " differs from control point 0 (" +
                           std::to_string(f.v) + " " + f.unit +
                           "): a beam that moves or changes during delivery is not handled");
        }
        std::vector<double> kiso = r.nums(cps[k], DCM_IsocenterPosition, kctx);
        if (!kiso.empty() && (kiso.size() != 3 || !b->has_isocenter ||
                              std::fabs(kiso[0] - b->isocenter_mm.x) > 1e-6 ||
                              std::fabs(kiso[1] - b->isocenter_mm.y) > 1e-6 ||
                              std::fabs(kiso[2] - b->isocenter_mm.z) > 1e-6))
            r.fail(SL_EINPUT, Reader::at(kctx, DCM_IsocenterPosition),
                   "differs from control point 0: a beam that moves during delivery is not "
                   "handled");
    }
    b->ssd_mm = r.num(cp, DCM_SourceToSurfaceDistance, cctx, false);
    if (std::isfinite(b->ssd_mm) && (b->ssd_mm <= 0.0 || b->ssd_mm > 2000.0))
        r.fail(SL_EINPUT, Reader::at(cctx, DCM_SourceToSurfaceDistance),
               std::to_string(b->ssd_mm) + " mm is not a plausible source-surface distance");

    read_applicator(r, it, ctx, &b->applicator);

    std::vector<DcmItem *> blocks = r.seq(it, DCM_BlockSequence, ctx, false);
    int nblocks = r.integer(it, DCM_NumberOfBlocks, ctx, false, 0);
    if (nblocks < 0 || static_cast<size_t>(nblocks) != blocks.size())
        r.fail(SL_EINPUT, Reader::at(ctx, DCM_NumberOfBlocks),
               "says " + std::to_string(nblocks) + " but the Block Sequence holds " +
                   std::to_string(blocks.size()));
    b->blocks = alloc_array<sl_block>(r, blocks.size());
    for (size_t i = 0; i < blocks.size(); i++) {
        b->nblocks = i + 1;
        read_block(r, blocks[i], ctx + " > block item " + std::to_string(i + 1), &b->blocks[i]);
    }

    std::vector<DcmItem *> boli = r.seq(it, DCM_ReferencedBolusSequence, ctx, false);
    b->bolus_roi_numbers = alloc_array<int>(r, boli.size());
    for (size_t i = 0; i < boli.size(); i++) {
        b->bolus_roi_numbers[i] = r.integer(boli[i], DCM_ReferencedROINumber,
                                            ctx + " > bolus item " + std::to_string(i + 1), true);
        b->nboli = i + 1;
    }
}

void read_plan_items(Reader &r, DcmDataset *ds, sl_plan *p)
{
    p->sop_instance_uid = r.cstr(r.str_req(ds, DCM_SOPInstanceUID, ""));
    p->label = r.cstr(r.str(ds, DCM_RTPlanLabel));
    p->name = r.cstr(r.str(ds, DCM_RTPlanName));
    p->patient_id = r.cstr(r.str(ds, DCM_PatientID));
    p->patient_name = r.cstr(r.str(ds, DCM_PatientName));
    /* for the patient's sex and age at the plan date (the assessment checks
     * the strings; absent stays NULL) */
    p->patient_sex = r.cstr(r.str(ds, DCM_PatientSex));
    p->patient_birth_date = r.cstr(r.str(ds, DCM_PatientBirthDate));
    p->plan_date = r.cstr(r.str(ds, DCM_RTPlanDate));
    p->frame_uid = r.cstr(r.str(ds, DCM_FrameOfReferenceUID));
    /* RT General Plan and RT Approval modules, for the report's header */
    p->study_uid = r.cstr(r.str(ds, DCM_StudyInstanceUID));
    p->approval_status = r.cstr(r.str(ds, DCM_ApprovalStatus));
    p->review_date = r.cstr(r.str(ds, DCM_ReviewDate));
    p->review_time = r.cstr(r.str(ds, DCM_ReviewTime));
    p->reviewer_name = r.cstr(r.str(ds, DCM_ReviewerName));
    std::vector<DcmItem *> rss = r.seq(ds, DCM_ReferencedStructureSetSequence, "", false);
    if (!rss.empty())
        p->structure_set_uid = r.cstr(r.str(rss[0], DCM_ReferencedSOPInstanceUID));

    std::vector<DcmItem *> setups = r.seq(ds, DCM_PatientSetupSequence, "", false);
    p->setups = alloc_array<sl_setup>(r, setups.size());
    for (size_t i = 0; i < setups.size(); i++) {
        std::string ctx = "patient setup item " + std::to_string(i + 1);
        sl_setup *s = &p->setups[i];
        s->number = r.integer(setups[i], DCM_PatientSetupNumber, ctx, true);
        std::string pos = r.str(setups[i], DCM_PatientPosition);
        if (pos.empty())
            r.fail(SL_EINPUT, Reader::at(ctx, DCM_PatientPosition),
                   "missing (strayline needs the patient position to place the beams)");
        if (!sl_position_parse(pos.c_str(), &s->position))
            r.fail(SL_EINPUT, Reader::at(ctx, DCM_PatientPosition),
                   "unsupported patient position '" + pos +
                       "' (HFS, HFP, FFS, FFP, HFDR, HFDL, FFDR, FFDL are handled)");
        p->nsetups = i + 1;
    }

    std::vector<DcmItem *> groups = r.seq(ds, DCM_FractionGroupSequence, "", true);
    p->groups = alloc_array<sl_fraction_group>(r, groups.size());
    for (size_t i = 0; i < groups.size(); i++) {
        std::string ctx = "fraction group item " + std::to_string(i + 1);
        sl_fraction_group *g = &p->groups[i];
        p->ngroups = i + 1;
        g->number = r.integer(groups[i], DCM_FractionGroupNumber, ctx, true);
        ctx = "fraction group " + std::to_string(g->number);
        g->fractions = r.integer(groups[i], DCM_NumberOfFractionsPlanned, ctx, false, -1);
        if (g->fractions != -1 && (g->fractions < 1 || g->fractions > 1000))
            r.fail(SL_EINPUT, Reader::at(ctx, DCM_NumberOfFractionsPlanned),
                   std::to_string(g->fractions) + " is not a plausible number of fractions");
        std::vector<DcmItem *> refs = r.seq(groups[i], DCM_ReferencedBeamSequence, ctx, false);
        int nbeams = r.integer(groups[i], DCM_NumberOfBeams, ctx, false, -1);
        if (nbeams != -1 && static_cast<size_t>(nbeams) != refs.size())
            r.fail(SL_EINPUT, Reader::at(ctx, DCM_NumberOfBeams),
                   "says " + std::to_string(nbeams) + " but the Referenced Beam Sequence holds " +
                       std::to_string(refs.size()));
        g->refs = alloc_array<sl_beam_ref>(r, refs.size());
        for (size_t j = 0; j < refs.size(); j++) {
            std::string rctx = ctx + " > referenced beam item " + std::to_string(j + 1);
            sl_beam_ref *br = &g->refs[j];
            g->nrefs = j + 1;
            br->beam_number = r.integer(refs[j], DCM_ReferencedBeamNumber, rctx, true);
            br->meterset_mu = r.num(refs[j], DCM_BeamMeterset, rctx, false);
            if (std::isfinite(br->meterset_mu) && (br->meterset_mu < 0 || br->meterset_mu > 1e5))
                r.fail(SL_EINPUT, Reader::at(rctx, DCM_BeamMeterset),
                       std::to_string(br->meterset_mu) + " MU is not a plausible meterset");
            br->beam_dose_gy = r.num(refs[j], DCM_BeamDose, rctx, false);
            if (std::isfinite(br->beam_dose_gy) &&
                (br->beam_dose_gy < 0 || br->beam_dose_gy > 100))
                r.fail(SL_EINPUT, Reader::at(rctx, DCM_BeamDose),
                       std::to_string(br->beam_dose_gy) + " Gy is not a plausible beam dose");
        }
    }

    std::vector<DcmItem *> drs = r.seq(ds, DCM_DoseReferenceSequence, "", false);
    p->dose_refs = alloc_array<sl_dose_ref>(r, drs.size());
    for (size_t i = 0; i < drs.size(); i++) {
        std::string ctx = "dose reference item " + std::to_string(i + 1);
        sl_dose_ref *d = &p->dose_refs[i];
        p->ndose_refs = i + 1;
        d->number = r.integer(drs[i], DCM_DoseReferenceNumber, ctx, false, 0);
        d->type = r.cstr(r.str(drs[i], DCM_DoseReferenceType));
        d->description = r.cstr(r.str(drs[i], DCM_DoseReferenceDescription));
        d->target_prescription_gy = r.num(drs[i], DCM_TargetPrescriptionDose, ctx, false);
        if (std::isfinite(d->target_prescription_gy) &&
            (d->target_prescription_gy < 0 || d->target_prescription_gy > 200))
            r.fail(SL_EINPUT, Reader::at(ctx, DCM_TargetPrescriptionDose),
                   std::to_string(d->target_prescription_gy) +
                       " Gy is not a plausible prescription");
    }

    std::vector<DcmItem *> beams = r.seq(ds, DCM_BeamSequence, "", false);
    if (beams.empty())
        r.fail(SL_EINPUT, "",
               "no electron beams: photon plans are not handled (the plan has no Beam Sequence)");
    p->beams = alloc_array<sl_beam>(r, beams.size());
    for (size_t i = 0; i < beams.size(); i++) {
        p->nbeams = i + 1;
        read_beam(r, beams[i], i, &p->beams[i], p);
    }
}

/* ------------------------------------------------------- structure set -- */

/* ROI numbers to ROIs: a hash, so that structure sets of tens of
 * thousands of ROIs read in linear time. */
using roi_index = std::unordered_map<int, size_t>;

sl_roi *roi_by_number(sl_structure_set *ss, const roi_index &idx, int number)
{
    auto it = idx.find(number);
    return it == idx.end() ? nullptr : &ss->rois[it->second];
}

void read_structure_items(Reader &r, DcmDataset *ds, sl_structure_set *ss)
{
    ss->sop_instance_uid = r.cstr(r.str_req(ds, DCM_SOPInstanceUID, ""));
    ss->label = r.cstr(r.str(ds, DCM_StructureSetLabel));
    ss->patient_id = r.cstr(r.str(ds, DCM_PatientID));
    ss->patient_name = r.cstr(r.str(ds, DCM_PatientName));
    std::vector<DcmItem *> frames = r.seq(ds, DCM_ReferencedFrameOfReferenceSequence, "", false);
    if (!frames.empty())
        ss->frame_uid = r.cstr(r.str(frames[0], DCM_FrameOfReferenceUID));

    std::vector<DcmItem *> rois = r.seq(ds, DCM_StructureSetROISequence, "", true);
    ss->rois = alloc_array<sl_roi>(r, rois.size());
    roi_index idx;
    idx.reserve(rois.size());
    for (size_t i = 0; i < rois.size(); i++) {
        std::string ctx = "structure set ROI item " + std::to_string(i + 1);
        sl_roi *roi = &ss->rois[i];
        ss->nrois = i + 1;
        roi->number = r.integer(rois[i], DCM_ROINumber, ctx, true);
        if (!idx.emplace(roi->number, i).second)
            r.fail(SL_EINPUT, Reader::at(ctx, DCM_ROINumber),
                   "duplicate ROI number " + std::to_string(roi->number));
        std::string name = r.str(rois[i], DCM_ROIName);
        if (name.empty())
            r.fail(SL_EINPUT, Reader::at("ROI " + std::to_string(roi->number), DCM_ROIName),
                   "missing or empty");
        roi->name = r.cstr(name);
        roi->frame_uid = r.cstr(r.str(rois[i], DCM_ReferencedFrameOfReferenceUID));
    }

    size_t total_points = 0;
    std::vector<DcmItem *> rcs = r.seq(ds, DCM_ROIContourSequence, "", false);
    /* every contour's values converted first, on every core; the walk
     * below takes them in order and checks everything as before */
    sl_dicom_internal::contour_batch batch;
    for (DcmItem *rc : rcs) {
        DcmSequenceOfItems *sq = nullptr;
        if (rc->findAndGetSequence(DCM_ContourSequence, sq).bad() || !sq)
            continue;
        for (DcmObject *o = sq->nextInContainer(nullptr); o; o = sq->nextInContainer(o)) {
            DcmElement *el = nullptr;
            if (static_cast<DcmItem *>(o)->findAndGetElement(DCM_ContourData, el).good() && el &&
                el->getLength() > 0 && el->ident() == EVR_DS)
                batch.add(el);
        }
    }
    batch.convert(sl_parallel_threads(0), SL_DICOM_MAX_CONTOUR_POINTS);
    for (size_t i = 0; i < rcs.size(); i++) {
        std::string ctx0 = "ROI contour item " + std::to_string(i + 1);
        int ref = r.integer(rcs[i], DCM_ReferencedROINumber, ctx0, true);
        sl_roi *roi = roi_by_number(ss, idx, ref);
        if (!roi)
            r.fail(SL_EINPUT, Reader::at(ctx0, DCM_ReferencedROINumber),
                   "refers to ROI " + std::to_string(ref) +
                       ", which the Structure Set ROI Sequence does not list");
        std::string ctx = "ROI " + std::to_string(ref) + " (" + roi->name + ")";
        if (roi->contours)
            r.fail(SL_EINPUT, ctx, "has two ROI Contour Sequence items");
        std::vector<double> color = r.nums(rcs[i], DCM_ROIDisplayColor, ctx);
        if (!color.empty()) {
            if (color.size() != 3)
                r.fail(SL_EINPUT, Reader::at(ctx, DCM_ROIDisplayColor),
                       "expected 3 values, found " + std::to_string(color.size()));
            for (int k = 0; k < 3; k++) {
                if (color[k] < 0 || color[k] > 255)
                    r.fail(SL_EINPUT, Reader::at(ctx, DCM_ROIDisplayColor),
                           "colour component outside 0..255");
                roi->color[k] = static_cast<int>(color[k]);
            }
            roi->has_color = true;
        }
        std::vector<DcmItem *> cs = r.seq(rcs[i], DCM_ContourSequence, ctx, false);
        roi->contours = alloc_array<sl_contour>(r, cs.size() ? cs.size() : 1);
        for (size_t j = 0; j < cs.size(); j++) {
            std::string cctx = ctx + " > contour item " + std::to_string(j + 1);
            sl_contour *c = &roi->contours[j];
            roi->ncontours = j + 1;
            std::string type = r.str_req(cs[j], DCM_ContourGeometricType, cctx);
            if (!sl_contour_type_parse(type.c_str(), &c->type))
                r.fail(SL_EINPUT, Reader::at(cctx, DCM_ContourGeometricType),
                       "unknown contour type '" + type + "'");
            int n = r.integer(cs[j], DCM_NumberOfContourPoints, cctx, true);
            /* refuse an oversized structure set on its declared counts,
             * before its data are parsed into memory */
            if (n > 0 && total_points + static_cast<size_t>(n) > SL_DICOM_MAX_CONTOUR_POINTS)
                r.fail(SL_EINPUT, cctx,
                       "the structure set holds more than " +
                           std::to_string(SL_DICOM_MAX_CONTOUR_POINTS) +
                           " contour points, more than strayline accepts");
            size_t nvalues = 0;
            r.contour_data(cs[j], cctx, &nvalues, [&](sl_vec3 *p) { c->points = p; }, &batch);
            if (nvalues == 0)
                r.fail(SL_EINPUT, Reader::at(cctx, DCM_ContourData), "missing or empty");
            if (nvalues % 3 != 0)
                r.fail(SL_EINPUT, Reader::at(cctx, DCM_ContourData),
                       "has " + std::to_string(nvalues) +
                           " values, not a whole number of (x,y,z) triples");
            if (n < 1 || static_cast<size_t>(n) * 3 != nvalues)
                r.fail(SL_EINPUT, Reader::at(cctx, DCM_NumberOfContourPoints),
                       "says " + std::to_string(n) + " points but Contour Data holds " +
                           std::to_string(nvalues / 3));
            size_t need = c->type == SL_CONTOUR_POINT ? 1
                          : (c->type == SL_CONTOUR_OPEN_PLANAR || c->type == SL_CONTOUR_OPEN_NONPLANAR)
                              ? 2
                              : 3;
            if (c->type == SL_CONTOUR_POINT && n != 1)
                r.fail(SL_EINPUT, Reader::at(cctx, DCM_NumberOfContourPoints),
                       "a POINT contour has exactly one point, found " + std::to_string(n));
            if (static_cast<size_t>(n) < need)
                r.fail(SL_EINPUT, Reader::at(cctx, DCM_NumberOfContourPoints),
                       "a " + type + " contour needs at least " + std::to_string(need) +
                           " points, found " + std::to_string(n));
            total_points += static_cast<size_t>(n);
            for (size_t k = 0; k < static_cast<size_t>(n); k++) {
                const double xyz[3] = {c->points[k].x, c->points[k].y, c->points[k].z};
                for (double v : xyz) {
                    if (std::fabs(v) > 1.0e5)
                        r.fail(SL_EINPUT, Reader::at(cctx, DCM_ContourData),
                               "coordinate " + std::to_string(v) + " mm is absurd");
                }
            }
            c->npoints = static_cast<size_t>(n);
        }
    }

    std::vector<DcmItem *> obs = r.seq(ds, DCM_RTROIObservationsSequence, "", false);
    for (size_t i = 0; i < obs.size(); i++) {
        std::string ctx = "RT ROI observation item " + std::to_string(i + 1);
        int ref = r.integer(obs[i], DCM_ReferencedROINumber, ctx, true);
        sl_roi *roi = roi_by_number(ss, idx, ref);
        if (!roi)
            r.fail(SL_EINPUT, Reader::at(ctx, DCM_ReferencedROINumber),
                   "refers to ROI " + std::to_string(ref) + ", which is not listed");
        std::string type = r.str(obs[i], DCM_RTROIInterpretedType);
        if (!type.empty() && !roi->type)
            roi->type = r.cstr(type);
    }
}

/* ------------------------------------------------------------- common -- */

void read_object(Reader &r, DcmFileFormat &ff, sl_dicom_object *out)
{
    DcmDataset *ds = ff.getDataset();
    if (!ds || ds->card() == 0)
        r.fail(SL_EINPUT, "", "no DICOM data set in the file");
    std::string cls = r.str(ds, DCM_SOPClassUID);
    if (cls.empty())
        r.fail(SL_EINPUT, Reader::tag_name(DCM_SOPClassUID),
               "missing: not a DICOM composite object");
    std::string modality = r.str(ds, DCM_Modality);
    if ((cls == UID_RTPLAN && !modality.empty() && modality != "RTPLAN") ||
        (cls == UID_RTSTRUCT && !modality.empty() && modality != "RTSTRUCT"))
        r.fail(SL_EINPUT, Reader::tag_name(DCM_Modality),
               "'" + modality + "' contradicts the SOP Class (" +
                   (cls == UID_RTPLAN ? "RT Plan" : "RT Structure Set") + ")");
    if (cls == UID_RTPLAN) {
        out->kind = SL_DICOM_RTPLAN;
        out->plan = static_cast<sl_plan *>(calloc(1, sizeof(sl_plan)));
        if (!out->plan)
            r.fail(SL_ENOMEM, "", "out of memory");
        out->plan->source = r.cstr(r.file());
        read_plan_items(r, ds, out->plan);
    } else if (cls == UID_RTSTRUCT) {
        out->kind = SL_DICOM_RTSTRUCT;
        out->structures = static_cast<sl_structure_set *>(calloc(1, sizeof(sl_structure_set)));
        if (!out->structures)
            r.fail(SL_ENOMEM, "", "out of memory");
        out->structures->source = r.cstr(r.file());
        read_structure_items(r, ds, out->structures);
    } else {
        const char *name = dcmFindNameOfUID(cls.c_str(), nullptr);
        std::string what = name ? std::string(name) + ", SOP Class " + cls : "SOP Class " + cls;
        if (cls == UID_RTIONPLAN)
            what += "; ion plans are not handled";
        r.fail(SL_EINPUT, Reader::tag_name(DCM_SOPClassUID),
               "a DICOM object of another kind (" + what +
                   "), not an RT Plan or an RT Structure Set");
    }
}

/* The deepest nesting of sequences in a data set, walked without recursion
 * (the tree may be as deep as the file allows). */
int nesting_depth(DcmItem *root)
{
    std::vector<std::pair<DcmItem *, int>> todo{{root, 0}};
    int deepest = 0;
    while (!todo.empty()) {
        DcmItem *it = todo.back().first;
        int d = todo.back().second;
        todo.pop_back();
        deepest = std::max(deepest, d);
        if (deepest > SL_DICOM_MAX_NESTING)
            break;
        /* lists are walked, not indexed: getElement(i) and getItem(k) seek
         * from the start */
        for (DcmObject *e = it ? it->nextInContainer(nullptr) : nullptr; e;
             e = it->nextInContainer(e)) {
            if (e->ident() != EVR_SQ)
                continue;
            DcmSequenceOfItems *sq = static_cast<DcmSequenceOfItems *>(e);
            for (DcmObject *k = sq->nextInContainer(nullptr); k; k = sq->nextInContainer(k))
                todo.emplace_back(static_cast<DcmItem *>(k), d + 1);
        }
    }
    return deepest;
}

/* Text values in UTF-8 whatever the file's Specific Character Set: the
 * reports are UTF-8 (JSON must be). Characters that cannot be converted are
 * dropped, and *note says so. */
void to_utf8(DcmDataset *ds, std::string &note)
{
    OFString cs;
    if (ds->findAndGetOFStringArray(DCM_SpecificCharacterSet, cs).bad() || cs.empty() ||
        cs == "ISO_IR 192")
        return;
    if (ds->convertToUTF8().good())
        return;
    if (ds->convertCharacterSet("ISO_IR 192", DCMTypes::CF_discardIllegal).good())
        note = "Specific Character Set '" + std::string(cs.c_str()) +
               "': some characters could not be converted to UTF-8 and were left out";
    else
        note = "Specific Character Set '" + std::string(cs.c_str()) +
               "' could not be converted to UTF-8: names that are not plain ASCII may show "
               "wrongly";
}

sl_status finish(Reader &r, DcmFileFormat &ff, OFCondition cond, sl_dicom_object *out,
                 sl_error *err)
{
    memset(out, 0, sizeof *out);
    if (cond.bad()) {
        return sl_error_set(err, SL_EINPUT,
                            "%s: cannot read as DICOM (not a DICOM file, or truncated): %s",
                            r.file(), cond.text());
    }
    if (ff.getDataset()) {
        int depth = nesting_depth(ff.getDataset());
        if (depth > SL_DICOM_MAX_NESTING)
            return sl_error_set(err, SL_EINPUT,
                                "%s: sequences nested more than %d levels deep (an RT Plan or "
                                "Structure Set needs fewer than 10): refused",
                                r.file(), SL_DICOM_MAX_NESTING);
    }
    std::string charset_note;
    try {
        if (ff.getDataset())
            to_utf8(ff.getDataset(), charset_note);
        read_object(r, ff, out);
        if (!charset_note.empty()) {
            sl_notes *notes = out->plan ? &out->plan->notes
                                        : out->structures ? &out->structures->notes : nullptr;
            if (notes)
                sl_notes_add(notes, "%s", charset_note.c_str());
        }
    } catch (const read_failure &f) {
        sl_dicom_object_free(out);
        return f.code;
    } catch (const std::bad_alloc &) {
        sl_dicom_object_free(out);
        return sl_error_set(err, SL_ENOMEM, "%s: out of memory", r.file());
    } catch (...) {
        sl_dicom_object_free(out);
        return sl_error_set(err, SL_EINTERNAL, "%s: unexpected failure in the DICOM reader",
                            r.file());
    }
    sl_status st = SL_OK;
    if (out->plan)
        st = sl_plan_validate(out->plan, err);
    else if (out->structures)
        st = sl_structure_set_validate(out->structures, err);
    if (st != SL_OK)
        sl_dicom_object_free(out);
    return st;
}

/* Is the data set deflated? With a well-formed file meta group (after the
 * preamble, (0002,0000) UL giving its length) the transfer syntax is looked
 * for in that group; without one, anywhere in the file, so that DCMTK is
 * never left to inflate a stream whose nesting was not counted. */
static const unsigned char META_HEAD[] = {0x02, 0x00, 0x00, 0x00, 'U', 'L', 0x04, 0x00};
const char DEFLATED_UID[] = "1.2.840.10008.1.2.1.99";

bool meta_length(const unsigned char *p, size_t n, size_t *meta)
{
    if (n < 144 || memcmp(p + 128, "DICM", 4) != 0 || memcmp(p + 132, META_HEAD, 8) != 0)
        return false;
    *meta = p[140] | (size_t)p[141] << 8 | (size_t)p[142] << 16 | (size_t)p[143] << 24;
    return *meta <= n - 144;
}

bool is_deflated(const unsigned char *p, size_t n)
{
    size_t meta;
    if (meta_length(p, n, &meta))
        return memmem(p + 144, meta, DEFLATED_UID, sizeof DEFLATED_UID - 1) != nullptr;
    return memmem(p, n, DEFLATED_UID, sizeof DEFLATED_UID - 1) != nullptr;
}

/* The data set of a deflated file, inflated (zlib, raw deflate) into *out.
 * It starts after the file meta group, which is explicit VR little endian
 * and opens with its own length, (0002,0000) UL, so its end is found without
 * parsing it. False when the stream cannot be found or inflated (DCMTK then
 * reports the file), or *too_big when it inflates past the file limit. */
bool inflate_dataset(const unsigned char *p, size_t n, std::vector<unsigned char> &out,
                     bool *too_big)
{
    size_t meta;
    *too_big = false;
    if (!meta_length(p, n, &meta))
        return false;
    z_stream z;
    memset(&z, 0, sizeof z);
    if (inflateInit2(&z, -MAX_WBITS) != Z_OK)
        return false;
    z.next_in = const_cast<unsigned char *>(p + 144 + meta);
    z.avail_in = static_cast<uInt>(std::min(n - 144 - meta, (size_t)UINT32_MAX));
    int rc = Z_OK;
    out.clear();
    while (rc == Z_OK) {
        size_t at = out.size();
        if (at + 65536 > SL_DICOM_MAX_FILE_BYTES) {
            *too_big = true;
            break;
        }
        out.resize(at + 65536);
        z.next_out = out.data() + at;
        z.avail_out = 65536;
        rc = inflate(&z, Z_NO_FLUSH);
        out.resize(at + 65536 - z.avail_out);
        if (z.avail_out == 65536 && rc == Z_OK)
            break; /* no progress: a truncated stream */
    }
    inflateEnd(&z);
    return !*too_big && (rc == Z_OK || rc == Z_STREAM_END);
}

struct load_job {
    Reader *r;
    const char *path;
    bool dataset_only;  /* a bare explicit little-endian data set (an inflated one) */
    sl_dicom_object *out;
    sl_error *err;
    sl_status st;
};

void *load_thread(void *arg)
{
    load_job *j = static_cast<load_job *>(arg);
    try {
        DcmFileFormat ff;
        /* every value read in the one pass over the file: with DCMTK's
         * default, each value over 4 KiB (every dense contour) is read
         * later by opening the file again and seeking to it */
        const Uint32 whole = OFstatic_cast(Uint32, -1);
        OFCondition cond =
            j->dataset_only
                ? ff.loadFile(j->path, EXS_LittleEndianExplicit, EGL_noChange, whole, ERM_dataset)
                : ff.loadFile(j->path, EXS_Unknown, EGL_noChange, whole, ERM_autoDetect);
        j->st = finish(*j->r, ff, cond, j->out, j->err);
    } catch (const std::bad_alloc &) {
        j->st = sl_error_set(j->err, SL_ENOMEM, "%s: out of memory", j->r->file());
    } catch (...) {
        j->st = sl_error_set(j->err, SL_EINTERNAL, "%s: unexpected failure in DCMTK",
                             j->r->file());
    }
    return nullptr;
}

/* A path DCMTK can read (and check declared lengths against) for bytes in
 * memory: an anonymous in-memory file. *fd receives it (close it after). */
sl_status memfile(Reader &r, const unsigned char *data, size_t size, int *fd, char *path,
                  size_t pathsize, sl_error *err)
{
    *fd = memfd_create("strayline-dicom", MFD_CLOEXEC);
    if (*fd < 0)
        return sl_error_set(err, SL_EINTERNAL, "%s: cannot make an in-memory file: %s",
                            r.file(), strerror(errno));
    for (size_t done = 0; done < size;) {
        ssize_t k = write(*fd, data + done, size - done);
        if (k <= 0) {
            close(*fd);
            *fd = -1;
            return sl_error_set(err, SL_EINTERNAL, "%s: cannot fill an in-memory file",
                                r.file());
        }
        done += static_cast<size_t>(k);
    }
    snprintf(path, pathsize, "/proc/self/fd/%d", *fd);
    return SL_OK;
}

/* DCMTK reads (and frees) nested sequences recursively, so a file of
 * thousands of nested sequences would overflow an ordinary stack. The read
 * runs on a thread whose stack has room for every level the bytes allow
 * (virtual memory, committed only as used); the depth is then refused. A
 * deflated file is inflated here first and DCMTK reads the inflated data
 * set from a file: from a compressed stream it would allocate whatever an
 * element declares (4 GB for a 5 KB file, found by fuzzing), from a file it
 * checks the length against the file's size.
 *
 * own, when given, holds the bytes in memory and is released once the
 * guards are done with them, before DCMTK reads the file: its pages are
 * then reused for DCMTK's copy instead of new ones being faulted in, which
 * on a large structure set is a fifth of the memory touched. */
sl_status load(Reader &r, const char *path, const unsigned char *raw, size_t n,
               raw_bytes *own, sl_dicom_object *out, sl_error *err)
{
    std::vector<unsigned char> inflated;
    bool too_big = false, dataset_only = false;
    if (is_deflated(raw, n)) {
        if (!inflate_dataset(raw, n, inflated, &too_big))
            return sl_error_set(err, SL_EINPUT,
                                too_big ? "%s: its deflated data set inflates to more than "
                                          "strayline accepts"
                                        : "%s: a deflated data set that cannot be inflated "
                                          "(the file meta group must open with its group "
                                          "length, (0002,0000), and the stream be whole)",
                                r.file());
        raw = inflated.data();
        n = inflated.size();
        dataset_only = true;
    }
    size_t items = count_item_tags(raw, n);
    if (own)
        raw_release(own); /* raw is not read again (an inflated copy is kept) */
    raw = nullptr;
    if (items > SL_DICOM_MAX_ITEMS)
        return sl_error_set(err, SL_EINPUT,
                            "%s: more than %zu sequence items: larger than strayline accepts",
                            r.file(), static_cast<size_t>(SL_DICOM_MAX_ITEMS));
    int fd = -1;
    char mpath[64];
    if (dataset_only) {
        sl_status st = memfile(r, inflated.data(), n, &fd, mpath, sizeof mpath, err);
        if (st != SL_OK)
            return st;
        path = mpath;
    }
    size_t stack = reader_stack(items);
    load_job job = {&r, path, dataset_only, out, err, SL_OK};
    int rc = run_on_stack(stack, load_thread, &job);
    if (fd >= 0)
        close(fd);
    if (rc != 0)
        return sl_error_set(err, rc == EAGAIN || rc == ENOMEM ? SL_ENOMEM : SL_EINTERNAL,
                            "%s: cannot start the reader with a %zu MB stack: %s", r.file(),
                            stack >> 20, strerror(rc));
    return job.st;
}

} // namespace

extern "C" {

sl_status sl_dicom_read(const char *path, sl_dicom_object *out, sl_error *err)
{
    quiet_dcmtk();
    memset(out, 0, sizeof *out);
    Reader r(path, err);
    raw_bytes m;
    sl_status st = raw_read_file(path, &m, err);
    if (st != SL_OK)
        return st;
    st = looks_like_dicom(m.data, m.size)
             ? load(r, path, m.data, m.size, &m, out, err)
             : sl_error_set(err, SL_EINPUT, "%s: %s", path, NOT_DICOM);
    raw_release(&m);
    return st;
}

sl_status sl_dicom_read_buffer(const void *data, size_t size, const char *name,
                               sl_dicom_object *out, sl_error *err)
{
    quiet_dcmtk();
    memset(out, 0, sizeof *out);
    Reader r(name, err);
    if (size == 0)
        return sl_error_set(err, SL_EINPUT, "%s: empty file, not DICOM", r.file());
    if (size > SL_DICOM_MAX_FILE_BYTES)
        return sl_error_set(err, SL_EINPUT, "%s: larger than strayline accepts", r.file());
    if (!looks_like_dicom(static_cast<const unsigned char *>(data), size))
        return sl_error_set(err, SL_EINPUT, "%s: %s", r.file(), NOT_DICOM);
    /* The buffer goes through the file reader, in an anonymous in-memory
     * file: DCMTK checks declared element lengths against the size of a file,
     * but allocates them before reading from a memory stream. */
    int fd;
    char path[64];
    const unsigned char *bytes = static_cast<const unsigned char *>(data);
    sl_status st = memfile(r, bytes, size, &fd, path, sizeof path, err);
    if (st != SL_OK)
        return st;
    st = load(r, path, bytes, size, nullptr, out, err);
    close(fd);
    return st;
}

sl_status sl_dicom_read_plan(const char *path, sl_plan **out, sl_error *err)
{
    *out = nullptr;
    sl_dicom_object obj;
    sl_status st = sl_dicom_read(path, &obj, err);
    if (st != SL_OK)
        return st;
    if (obj.kind != SL_DICOM_RTPLAN) {
        sl_dicom_object_free(&obj);
        return sl_error_set(err, SL_EINPUT, "%s: is an RT Structure Set, an RT Plan was expected",
                            path);
    }
    *out = obj.plan;
    return SL_OK;
}

sl_status sl_dicom_read_structures(const char *path, sl_structure_set **out, sl_error *err)
{
    *out = nullptr;
    sl_dicom_object obj;
    sl_status st = sl_dicom_read(path, &obj, err);
    if (st != SL_OK)
        return st;
    if (obj.kind != SL_DICOM_RTSTRUCT) {
        sl_dicom_object_free(&obj);
        return sl_error_set(err, SL_EINPUT,
                            "%s: is an RT Plan, an RT Structure Set was expected", path);
    }
    *out = obj.structures;
    return SL_OK;
}

void sl_dicom_object_free(sl_dicom_object *obj)
{
    if (!obj)
        return;
    sl_plan_free(obj->plan);
    sl_structure_set_free(obj->structures);
    obj->plan = nullptr;
    obj->structures = nullptr;
}

const char *sl_dicom_toolkit_version(void)
{
    return "DCMTK " OFFIS_DCMTK_VERSION_STRING;
}

} // extern "C"
