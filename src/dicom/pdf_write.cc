/*
 * The DICOM bridge, writing side: a PDF report wrapped as a DICOM
 * Encapsulated PDF object (PS3.3 A.45.1, SOP Class 1.2.840.10008.5.1.4.1.1.104.1)
 * filed in the plan's patient and study, so that the archive or the
 * record-and-verify system keeps the screening report next to the plan.
 *
 * The plan is first read with sl_dicom_read_plan, which carries every guard
 * of the reader (size, nesting, deflated data, "is it an RT Plan"); only then
 * does DCMTK load the file again, up to the end of group 0020, to copy the
 * Patient, Patient Study and General Study attributes as the plan has them
 * (same bytes, same Specific Character Set). Everything else is new: a new
 * series (Modality DOC), a new SOP Instance UID under DCMTK's root, the
 * document, its title and MIME type. The file is written with DCMTK's
 * saveFile into a temporary file beside the target and renamed into place
 * (sl_outfile_*). No C++ exception leaves this file.
 */
#include "strayline/dicom.h"
#include "strayline/util.h"
#include "strayline/version.h"

#include <dcmtk/config/osconfig.h>
#include <dcmtk/dcmdata/dcdeftag.h>
#include <dcmtk/dcmdata/dcfilefo.h>
#include <dcmtk/dcmdata/dcuid.h>
#include <dcmtk/dcmdata/dcvrda.h>
#include <dcmtk/dcmdata/dcvrdt.h>
#include <dcmtk/dcmdata/dcvrtm.h>
#include <dcmtk/oflog/oflog.h>

#include <cstdlib>
#include <cstring>
#include <mutex>
#include <new>
#include <string>
#include <vector>

namespace {

const char *const UID_ENCAPSULATED_PDF = "1.2.840.10008.5.1.4.1.1.104.1";
const char *const UID_RTPLAN = "1.2.840.10008.5.1.4.1.1.481.5";

/* Everything above this tag is left unparsed: the copied modules live in
 * groups 0008, 0010 and 0020. */
const DcmTagKey STOP_AFTER_GROUP_0020(0x0021, 0x0000);

void quiet_dcmtk()
{
    static std::once_flag once;
    std::call_once(once, [] { OFLog::configure(OFLogger::FATAL_LOG_LEVEL); });
}

/* General Study module (PS3.3 C.7.2.1): the attributes that place the
 * document in the plan's study. Type 2 ones are written empty when the plan
 * lacks them, as the IOD requires. */
struct study_attr {
    DcmTagKey key;
    bool type2;
};
const study_attr STUDY_ATTRS[] = {
    {DCM_StudyDate, true},
    {DCM_StudyTime, true},
    {DCM_ReferringPhysicianName, true},
    {DCM_ReferringPhysicianIdentificationSequence, false},
    {DCM_StudyID, true},
    {DCM_AccessionNumber, true},
    {DCM_IssuerOfAccessionNumberSequence, false},
    {DCM_StudyDescription, false},
    {DCM_PhysiciansOfRecord, false},
    {DCM_ReferencedStudySequence, false},
    /* Patient module attributes outside group 0010 (C.7.1.1) */
    {DCM_ReferencedPatientSequence, false},
};
/* Patient module (C.7.1.1) Type 2 attributes. */
const DcmTagKey PATIENT_TYPE2[] = {DCM_PatientName, DCM_PatientID, DCM_PatientBirthDate,
                                   DCM_PatientSex};

struct write_failure {
    sl_status code;
};

class Writer {
public:
    Writer(const char *out, const char *plan, sl_error *err) : out_(out), plan_(plan), err_(err)
    {
    }

    [[noreturn]] void fail(sl_status code, const char *file, const std::string &what)
    {
        sl_error_set(err_, code, "%s: %s", file, what.c_str());
        throw write_failure{code};
    }
    [[noreturn]] void fail_out(const std::string &what) { fail(SL_EIO, out_, what); }
    [[noreturn]] void fail_plan(const std::string &what) { fail(SL_EINPUT, plan_, what); }

    static std::string tag_name(const DcmTagKey &key)
    {
        DcmTag tag(key);
        char buf[32];
        snprintf(buf, sizeof buf, "(%04X,%04X)", key.getGroup(), key.getElement());
        return std::string(tag.getTagName()) + " " + buf;
    }

    /* Put a value into the new data set; DCMTK refuses only on a bug here
     * (a wrong VR for the tag) or when memory runs out. */
    void put(DcmDataset *ds, const DcmTagKey &key, const char *value)
    {
        OFCondition c = ds->putAndInsertString(key, value ? value : "");
        if (c.bad())
            fail(c == EC_MemoryExhausted ? SL_ENOMEM : SL_EINTERNAL, out_,
                 tag_name(key) + ": cannot set: " + c.text());
    }

    void copy(DcmDataset *from, DcmDataset *to, const DcmTagKey &key, bool type2)
    {
        DcmElement *el = nullptr;
        if (from->findAndGetElement(key, el).good() && el) {
            DcmElement *dup = static_cast<DcmElement *>(el->clone());
            if (!dup)
                fail(SL_ENOMEM, out_, "out of memory");
            if (to->insert(dup, OFTrue).bad()) {
                delete dup;
                fail(SL_EINTERNAL, out_, tag_name(key) + ": cannot copy from the plan");
            }
        } else if (type2) {
            if (to->insertEmptyElement(key).bad())
                fail(SL_EINTERNAL, out_, tag_name(key) + ": cannot insert");
        }
    }

    const char *out_;
    const char *plan_;
    sl_error *err_;
};

/* A Document Title is ST (PS3.6): at most 1024 characters; one line here,
 * so no control character. The caller's text is UTF-8. */
bool title_ok(const std::string &t, bool *ascii, std::string &why)
{
    size_t chars = 0;
    *ascii = true;
    for (size_t i = 0; i < t.size();) {
        unsigned char c = static_cast<unsigned char>(t[i]);
        size_t n = c < 0x80 ? 1 : (c >> 5) == 6 ? 2 : (c >> 4) == 14 ? 3 : (c >> 3) == 30 ? 4 : 0;
        if (n == 0 || i + n > t.size()) {
            why = "is not valid UTF-8";
            return false;
        }
        for (size_t k = 1; k < n; k++) {
            if ((static_cast<unsigned char>(t[i + k]) >> 6) != 2) {
                why = "is not valid UTF-8";
                return false;
            }
        }
        if (n > 1)
            *ascii = false;
        if (n == 1 && (c < 0x20 || c == 0x7f)) {
            why = "holds a control character (one line of text is expected)";
            return false;
        }
        i += n;
        chars++;
    }
    if (chars > 1024) {
        why = "is " + std::to_string(chars) + " characters long; an ST value holds at most 1024";
        return false;
    }
    return true;
}

void build(Writer &w, DcmDataset *plan, DcmDataset *ds, const unsigned char *pdf, size_t len,
           const std::string &title, bool title_ascii)
{
    OFString cls;
    if (plan->findAndGetOFString(DCM_SOPClassUID, cls).bad() || cls != UID_RTPLAN)
        w.fail_plan(Writer::tag_name(DCM_SOPClassUID) + ": '" + std::string(cls.c_str()) +
                    "' is not RT Plan Storage");
    OFString study;
    if (plan->findAndGetOFString(DCM_StudyInstanceUID, study).bad() || study.empty())
        w.fail_plan(Writer::tag_name(DCM_StudyInstanceUID) +
                    ": missing or empty: the document cannot be filed in the plan's study");

    /* Patient module and Patient Study module: all of group 0010, as the
     * plan has it (Issuer of Patient ID and the other identifiers matter to
     * an archive that matches on them). */
    w.copy(plan, ds, DCM_SpecificCharacterSet, false);
    for (DcmObject *o = plan->nextInContainer(nullptr); o; o = plan->nextInContainer(o)) {
        if (o->getGTag() == 0x0010 && o->getETag() != 0x0000)
            w.copy(plan, ds, o->getTag(), false);
    }
    for (const DcmTagKey &k : PATIENT_TYPE2)
        w.copy(plan, ds, k, true);
    w.copy(plan, ds, DCM_StudyInstanceUID, false);
    for (const study_attr &a : STUDY_ATTRS)
        w.copy(plan, ds, a.key, a.type2);

    /* A title with characters beyond ASCII: the copied text may be in another
     * character set, so the whole data set goes to UTF-8 first. */
    if (!title_ascii) {
        OFString cs;
        ds->findAndGetOFStringArray(DCM_SpecificCharacterSet, cs);
        if (cs != "ISO_IR 192") {
            OFCondition c = cs.empty() ? ds->putAndInsertString(DCM_SpecificCharacterSet,
                                                                "ISO_IR 192")
                                       : ds->convertToUTF8();
            if (c.bad())
                w.fail(SL_EUSAGE, w.out_,
                       "Document Title (0042,0010): the title is not plain ASCII and the "
                       "plan's Specific Character Set '" +
                           std::string(cs.c_str()) + "' cannot be converted to UTF-8 (" +
                           c.text() + ")");
        }
    }

    char series_uid[100], instance_uid[100];
    dcmGenerateUniqueIdentifier(series_uid, SITE_SERIES_UID_ROOT);
    dcmGenerateUniqueIdentifier(instance_uid, SITE_INSTANCE_UID_ROOT);
    OFString date, time, datetime;
    DcmDate::getCurrentDate(date);
    DcmTime::getCurrentTime(time, OFTrue /* seconds */, OFFalse);
    DcmDateTime::getCurrentDateTime(datetime, OFTrue, OFFalse, OFFalse);

    /* SOP Common (C.12.1) */
    w.put(ds, DCM_SOPClassUID, UID_ENCAPSULATED_PDF);
    w.put(ds, DCM_SOPInstanceUID, instance_uid);
    w.put(ds, DCM_InstanceCreationDate, date.c_str());
    w.put(ds, DCM_InstanceCreationTime, time.c_str());
    /* Encapsulated Document Series (C.24.1): a new series for the document.
     * One document a series, so its number is 1. */
    w.put(ds, DCM_Modality, "DOC");
    w.put(ds, DCM_SeriesInstanceUID, series_uid);
    w.put(ds, DCM_SeriesNumber, "1");
    w.put(ds, DCM_SeriesDate, date.c_str());
    w.put(ds, DCM_SeriesTime, time.c_str());
    w.put(ds, DCM_SeriesDescription, "strayline report");
    /* General Equipment (C.7.5.1) and SC Equipment (C.8.6.1): made on a
     * workstation (WSD) by this program. */
    w.put(ds, DCM_Manufacturer, "strayline");
    w.put(ds, DCM_ManufacturerModelName, "strayline");
    w.put(ds, DCM_SoftwareVersions, sl_version());
    w.put(ds, DCM_ConversionType, "WSD");
    /* Encapsulated Document (C.24.2) */
    w.put(ds, DCM_InstanceNumber, "1");
    w.put(ds, DCM_ContentDate, date.c_str());
    w.put(ds, DCM_ContentTime, time.c_str());
    w.put(ds, DCM_AcquisitionDateTime, datetime.c_str());
    /* the report prints the patient's name and ID on every page */
    w.put(ds, DCM_BurnedInAnnotation, "YES");
    w.put(ds, DCM_DocumentTitle, title.c_str());
    if (ds->insertEmptyElement(DCM_ConceptNameCodeSequence).bad())
        w.fail(SL_EINTERNAL, w.out_, "Concept Name Code Sequence (0040,A043): cannot insert");
    w.put(ds, DCM_MIMETypeOfEncapsulatedDocument, "application/pdf");

    /* Source Instance Sequence: the document was derived from the plan. */
    DcmItem *src = nullptr;
    if (ds->findOrCreateSequenceItem(DCM_SourceInstanceSequence, src, 0).bad() || !src)
        w.fail(SL_ENOMEM, w.out_, "out of memory");
    OFString plan_uid;
    plan->findAndGetOFString(DCM_SOPInstanceUID, plan_uid);
    if (src->putAndInsertString(DCM_ReferencedSOPClassUID, UID_RTPLAN).bad() ||
        src->putAndInsertString(DCM_ReferencedSOPInstanceUID, plan_uid.c_str()).bad())
        w.fail(SL_ENOMEM, w.out_, "out of memory");

    /* OB of even length: a trailing NUL pads an odd document (PS3.5 7.1.1);
     * Encapsulated Document Length keeps the true length. */
    size_t even = len + (len & 1u);
    std::vector<Uint8> bytes(even, 0);
    memcpy(bytes.data(), pdf, len);
    OFCondition c = ds->putAndInsertUint8Array(DCM_EncapsulatedDocument, bytes.data(),
                                               static_cast<unsigned long>(even));
    if (c.bad())
        w.fail(c == EC_MemoryExhausted ? SL_ENOMEM : SL_EINTERNAL, w.out_,
               "Encapsulated Document (0042,0011): cannot set: " + std::string(c.text()));
    if (ds->putAndInsertUint32(DCM_EncapsulatedDocumentLength, static_cast<Uint32>(len)).bad())
        w.fail(SL_EINTERNAL, w.out_, "Encapsulated Document Length (0042,0015): cannot set");
}

} // namespace

extern "C" {

sl_status sl_dicom_write_pdf(const char *out_path, const char *plan_path,
                             const unsigned char *pdf, size_t pdf_len, const char *title,
                             sl_error *err)
{
    if (!out_path || !plan_path || (!pdf && pdf_len))
        return sl_error_set(err, SL_EINTERNAL, "sl_dicom_write_pdf: missing argument");
    /* An OB value holds at most 0xFFFFFFFE bytes. */
    if (pdf_len < 5 || memcmp(pdf, "%PDF-", 5) != 0)
        return sl_error_set(err, SL_EINTERNAL,
                            "%s: Encapsulated Document (0042,0011): the document is not a PDF",
                            out_path);
    if (pdf_len > 0xFFFFFFF0u)
        return sl_error_set(err, SL_EUSAGE,
                            "%s: Encapsulated Document (0042,0011): a PDF of %zu bytes is larger "
                            "than a DICOM element holds",
                            out_path, pdf_len);
    std::string t = title ? title : "";
    bool ascii = true;
    std::string why;
    if (!title_ok(t, &ascii, why))
        return sl_error_set(err, SL_EUSAGE, "%s: Document Title (0042,0010): the title %s",
                            out_path, why.c_str());

    /* Every guard of the reader first: the plan must read as an RT Plan. */
    sl_plan *checked = nullptr;
    sl_status st = sl_dicom_read_plan(plan_path, &checked, err);
    if (st != SL_OK)
        return st;
    sl_plan_free(checked);

    quiet_dcmtk();
    Writer w(out_path, plan_path, err);
    sl_outfile out;
    memset(&out, 0, sizeof out);
    try {
        DcmFileFormat in;
        OFCondition c = in.loadFileUntilTag(plan_path, EXS_Unknown, EGL_noChange,
                                            DCM_MaxReadLength, ERM_autoDetect,
                                            STOP_AFTER_GROUP_0020);
        if (c.bad())
            w.fail_plan(std::string("cannot read: ") + c.text());
        DcmFileFormat doc;
        build(w, in.getDataset(), doc.getDataset(), pdf, pdf_len, t, ascii);

        const char *inputs[] = {plan_path};
        st = sl_outfile_open(&out, out_path, inputs, 1, err);
        if (st != SL_OK)
            return st;
        /* DCMTK writes the temporary file by name; sl_outfile_commit then
         * syncs (the same inode) and renames it into place. */
        c = doc.saveFile(out.tmp, EXS_LittleEndianExplicit, EET_ExplicitLength, EGL_recalcGL,
                         EPD_noChange, 0, 0, EWM_createNewMeta);
        if (c.bad())
            w.fail_out(std::string("cannot write: ") + c.text());
        return sl_outfile_commit(&out, err);
    } catch (const write_failure &f) {
        sl_outfile_abort(&out);
        return f.code;
    } catch (const std::bad_alloc &) {
        sl_outfile_abort(&out);
        return sl_error_set(err, SL_ENOMEM, "%s: out of memory", out_path);
    } catch (...) {
        sl_outfile_abort(&out);
        return sl_error_set(err, SL_EINTERNAL, "%s: unexpected failure in DCMTK", out_path);
    }
}

} // extern "C"
