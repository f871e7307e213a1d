/*
 * The identity of a DICOM file (dicomhead.h): SOP Class and Instance, patient
 * ID, label, frame of reference, the referenced structure set and the beams'
 * radiation types (an RT Dose: its frame, summation type and referenced
 * plan), read with DCMTK while long values stay on disk.
 *
 * `scan` runs this over every file of a folder, so it must be cheap and it
 * must survive anything: the same guards as the full reader (rt_read.cc)
 * apply. Files that do not start like DICOM are refused before DCMTK sees
 * them; DCMTK's recursive parser runs on a thread whose stack has room for
 * every nesting level the bytes allow; a deflated data set goes through the
 * full reader, which inflates it under its own limits. Text values are cut
 * to their field and anything but printable ASCII becomes '?': these are for
 * sorting and messages; reports take names from the full reader.
 */
#include "strayline/dicomhead.h"

#include "strayline/dicom.h"
#include "raw_file.h"

#include <dcmtk/config/osconfig.h>
#include <dcmtk/dcmdata/dctk.h>
#include <dcmtk/oflog/oflog.h>

#include <cerrno>
#include <cstdio>
#include <cstring>
#include <strings.h>
#include <fcntl.h>
#include <mutex>
#include <new>
#include <pthread.h>
#include <string>
#include <sys/mman.h>
#include <sys/stat.h>
#include <unistd.h>

using namespace sl_dicom_internal;

namespace {

const char *const UID_RTPLAN = "1.2.840.10008.5.1.4.1.1.481.5";
const char *const UID_RTSTRUCT = "1.2.840.10008.5.1.4.1.1.481.3";
const char *const UID_RTDOSE = "1.2.840.10008.5.1.4.1.1.481.2";
const char *const UID_DEFLATED = "1.2.840.10008.1.2.1.99";

/* Values longer than this stay on disk: the identifying elements are short. */
const Uint32 HEAD_MAX_READ = 256;

void quiet()
{
    static std::once_flag once;
    std::call_once(once, [] { OFLog::configure(OFLogger::FATAL_LOG_LEVEL); });
}

void copy_text(char *dst, size_t size, const char *src)
{
    size_t i = 0;
    for (; src && src[i] && i + 1 < size; i++) {
        unsigned char c = static_cast<unsigned char>(src[i]);
        dst[i] = c >= 0x20 && c < 0x7F ? static_cast<char>(c) : '?';
    }
    dst[i] = '\0';
}

std::string get(DcmItem *it, const DcmTagKey &key)
{
    OFString v;
    if (it && it->findAndGetOFString(key, v).good())
        return std::string(v.c_str());
    return std::string();
}

struct job {
    const char *path;
    sl_dicom_head *out;
    sl_error *err;
    sl_status st;
    bool deflated;
};

sl_status uid_field(const char *path, const char *elem, const std::string &v, char *dst,
                    bool required, sl_error *err)
{
    if (v.empty()) {
        dst[0] = '\0';
        return required ? sl_error_set(err, SL_EINPUT, "%s: %s: missing", path, elem) : SL_OK;
    }
    if (!sl_dicom_uid_valid(v.c_str())) {
        char shown[SL_HEAD_TEXT];
        copy_text(shown, sizeof shown, v.c_str());
        return sl_error_set(err, SL_EINPUT, "%s: %s: '%s' is not a valid UID", path, elem, shown);
    }
    snprintf(dst, SL_HEAD_UID, "%s", v.c_str());
    return SL_OK;
}

sl_status fill(const char *path, DcmFileFormat &ff, sl_dicom_head *out, sl_error *err)
{
    DcmDataset *ds = ff.getDataset();
    if (!ds || ds->card() == 0)
        return sl_error_set(err, SL_EINPUT, "%s: no DICOM data set in the file", path);
    std::string cls = get(ds, DCM_SOPClassUID);
    sl_status st = uid_field(path, "SOPClassUID (0008,0016)", cls, out->sop_class_uid, true, err);
    if (st == SL_OK)
        st = uid_field(path, "SOPInstanceUID (0008,0018)", get(ds, DCM_SOPInstanceUID),
                       out->sop_instance_uid, true, err);
    if (st != SL_OK)
        return st;
    copy_text(out->patient_id, sizeof out->patient_id, get(ds, DCM_PatientID).c_str());
    if (cls == UID_RTPLAN) {
        out->kind = SL_HEAD_RTPLAN;
        copy_text(out->label, sizeof out->label, get(ds, DCM_RTPlanLabel).c_str());
        st = uid_field(path, "FrameOfReferenceUID (0020,0052)", get(ds, DCM_FrameOfReferenceUID),
                       out->frame_uid, false, err);
        DcmItem *ref = nullptr;
        if (st == SL_OK &&
            ds->findAndGetSequenceItem(DCM_ReferencedStructureSetSequence, ref, 0).good())
            st = uid_field(path, "ReferencedStructureSetSequence (300C,0060) > "
                                 "ReferencedSOPInstanceUID (0008,1155)",
                           get(ref, DCM_ReferencedSOPInstanceUID), out->structure_set_uid, false,
                           err);
        DcmSequenceOfItems *beams = nullptr;
        if (ds->findAndGetSequence(DCM_BeamSequence, beams).good() && beams) {
            for (DcmObject *o = beams->nextInContainer(nullptr); o;
                 o = beams->nextInContainer(o)) {
                out->nbeams++;
                /* any case: a lower-case "electron" is refused when the
                 * plan is read, a row of its own, not skipped as photons */
                if (strcasecmp(get(static_cast<DcmItem *>(o), DCM_RadiationType).c_str(),
                               "ELECTRON") == 0)
                    out->electron_beams++;
            }
        }
    } else if (cls == UID_RTSTRUCT) {
        out->kind = SL_HEAD_RTSTRUCT;
        copy_text(out->label, sizeof out->label, get(ds, DCM_StructureSetLabel).c_str());
        DcmItem *fr = nullptr;
        if (ds->findAndGetSequenceItem(DCM_ReferencedFrameOfReferenceSequence, fr, 0).good())
            st = uid_field(path, "ReferencedFrameOfReferenceSequence (3006,0010) > "
                                 "FrameOfReferenceUID (0020,0052)",
                           get(fr, DCM_FrameOfReferenceUID), out->frame_uid, false, err);
    } else if (cls == UID_RTDOSE) {
        /* the plan it belongs to and its frame, so that `scan` can give it
         * to that plan (the full reader, rtdose.cc, checks it again) */
        out->kind = SL_HEAD_RTDOSE;
        copy_text(out->summation, sizeof out->summation, get(ds, DCM_DoseSummationType).c_str());
        st = uid_field(path, "FrameOfReferenceUID (0020,0052)", get(ds, DCM_FrameOfReferenceUID),
                       out->frame_uid, false, err);
        DcmItem *ref = nullptr;
        if (st == SL_OK &&
            ds->findAndGetSequenceItem(DCM_ReferencedRTPlanSequence, ref, 0).good())
            st = uid_field(path, "ReferencedRTPlanSequence (300C,0002) > "
                                 "ReferencedSOPInstanceUID (0008,1155)",
                           get(ref, DCM_ReferencedSOPInstanceUID), out->plan_ref_uid, false, err);
    } else {
        out->kind = SL_HEAD_OTHER;
    }
    return st;
}

void *load_thread(void *arg)
{
    job *j = static_cast<job *>(arg);
    try {
        DcmFileFormat ff;
        OFCondition cond = ff.loadFile(j->path, EXS_Unknown, EGL_noChange, HEAD_MAX_READ,
                                       ERM_autoDetect);
        if (cond.bad())
            j->st = sl_error_set(j->err, SL_EINPUT,
                                 "%s: cannot read as DICOM (not a DICOM file, or truncated): %s",
                                 j->path, cond.text());
        else
            j->st = fill(j->path, ff, j->out, j->err);
    } catch (const std::bad_alloc &) {
        j->st = sl_error_set(j->err, SL_ENOMEM, "%s: out of memory", j->path);
    } catch (...) {
        j->st = sl_error_set(j->err, SL_EINTERNAL, "%s: unexpected failure in DCMTK", j->path);
    }
    return nullptr;
}

/* The transfer syntax of the file meta group, read alone (no data set). */
bool deflated(const char *path)
{
    DcmFileFormat ff;
    if (ff.loadFile(path, EXS_Unknown, EGL_noChange, HEAD_MAX_READ, ERM_metaOnly).bad())
        return false;
    OFString ts;
    DcmMetaInfo *meta = ff.getMetaInfo();
    return meta && meta->findAndGetOFString(DCM_TransferSyntaxUID, ts).good() &&
           ts == UID_DEFLATED;
}

/* A deflated file: the full reader inflates it safely; take its identity
 * from the objects it returns. */
sl_status head_from_full(const char *path, sl_dicom_head *out, sl_error *err)
{
    sl_dicom_object obj;
    sl_status st = sl_dicom_read(path, &obj, err);
    if (st != SL_OK)
        return st;
    if (obj.plan) {
        const sl_plan *p = obj.plan;
        out->kind = SL_HEAD_RTPLAN;
        snprintf(out->sop_class_uid, sizeof out->sop_class_uid, "%s", UID_RTPLAN);
        snprintf(out->sop_instance_uid, sizeof out->sop_instance_uid, "%s",
                 p->sop_instance_uid ? p->sop_instance_uid : "");
        copy_text(out->patient_id, sizeof out->patient_id, p->patient_id);
        copy_text(out->label, sizeof out->label, p->label);
        snprintf(out->frame_uid, sizeof out->frame_uid, "%s", p->frame_uid ? p->frame_uid : "");
        snprintf(out->structure_set_uid, sizeof out->structure_set_uid, "%s",
                 p->structure_set_uid ? p->structure_set_uid : "");
        out->nbeams = static_cast<int>(p->nbeams);
        for (size_t i = 0; i < p->nbeams; i++)
            if (p->beams[i].radiation_type && strcmp(p->beams[i].radiation_type, "ELECTRON") == 0)
                out->electron_beams++;
    } else if (obj.structures) {
        const sl_structure_set *s = obj.structures;
        out->kind = SL_HEAD_RTSTRUCT;
        snprintf(out->sop_class_uid, sizeof out->sop_class_uid, "%s", UID_RTSTRUCT);
        snprintf(out->sop_instance_uid, sizeof out->sop_instance_uid, "%s",
                 s->sop_instance_uid ? s->sop_instance_uid : "");
        copy_text(out->patient_id, sizeof out->patient_id, s->patient_id);
        copy_text(out->label, sizeof out->label, s->label);
        snprintf(out->frame_uid, sizeof out->frame_uid, "%s", s->frame_uid ? s->frame_uid : "");
    }
    sl_dicom_object_free(&obj);
    if (!sl_dicom_uid_valid(out->sop_instance_uid))
        return sl_error_set(err, SL_EINPUT, "%s: SOPInstanceUID (0008,0018): not a valid UID",
                            path);
    return SL_OK;
}

} // namespace

extern "C" {

int sl_dicom_uid_valid(const char *s)
{
    size_t n = s ? strlen(s) : 0;
    if (n == 0 || n > 64)
        return 0;
    bool start = true;
    for (size_t i = 0; i < n; i++) {
        char c = s[i];
        if (c == '.') {
            if (start)
                return 0; /* empty component */
            start = true;
        } else if (c >= '0' && c <= '9') {
            if (start && c == '0' && i + 1 < n && s[i + 1] != '.')
                return 0; /* leading zero */
            start = false;
        } else {
            return 0;
        }
    }
    return !start;
}

namespace {

struct same_job {
    const char *a, *b;
    int result;
};

void *same_thread(void *p)
{
    same_job *j = static_cast<same_job *>(p);
    try {
        DcmFileFormat fa, fb;
        j->result = fa.loadFile(j->a).good() && fb.loadFile(j->b).good() &&
                    fa.getDataset()->compare(*fb.getDataset()) == 0;
    } catch (...) {
        j->result = 0;
    }
    return nullptr;
}

/* The sequence items of a file (a bound on its nesting), or SIZE_MAX. */
size_t file_items(const char *path)
{
    raw_bytes m;
    sl_error ignored = {};
    if (raw_read_file(path, &m, &ignored) != SL_OK)
        return SIZE_MAX;
    size_t k = count_item_tags(m.data, m.size);
    raw_release(&m);
    return k;
}

} // namespace

/* Element for element (DcmItem::compare: values, not bytes), so another
 * transfer syntax or another sender's file meta information is still the
 * same data set. Only called on files whose headers were read already.
 * DCMTK reads and compares nested sequences recursively: as for the full
 * reader, on a thread whose stack has room for every level the items
 * allow, so that an object nested a hundred thousand deep and sent twice
 * cannot overflow a network worker's stack (a suspicion of an independent
 * review); one the reader would refuse is not the same. */
int sl_dicom_same_data_set(const char *a, const char *b)
{
    size_t ia = file_items(a), ib = file_items(b);
    if (ia > SL_DICOM_MAX_ITEMS || ib > SL_DICOM_MAX_ITEMS)
        return 0;
    same_job job = {a, b, 0};
    if (run_on_stack(reader_stack(ia + ib), same_thread, &job) != 0)
        return 0; /* not compared: not taken as the same */
    return job.result;
}

sl_status sl_dicom_read_head(const char *path, sl_dicom_head *out, sl_error *err)
{
    quiet();
    memset(out, 0, sizeof *out);
    raw_bytes m;
    sl_status mst = raw_read_file(path, &m, err);
    if (mst != SL_OK)
        return mst;
    bool dicom = looks_like_dicom(m.data, m.size);
    size_t items = dicom ? count_item_tags(m.data, m.size) : 0;
    raw_release(&m);
    if (!dicom)
        return sl_error_set(err, SL_EINPUT, "%s: %s", path, NOT_DICOM);
    if (items > SL_DICOM_MAX_ITEMS)
        return sl_error_set(err, SL_EINPUT,
                            "%s: more than %zu sequence items: larger than strayline accepts",
                            path, static_cast<size_t>(SL_DICOM_MAX_ITEMS));
    try {
        if (deflated(path))
            return head_from_full(path, out, err);
    } catch (...) {
        return sl_error_set(err, SL_EINTERNAL, "%s: unexpected failure in DCMTK", path);
    }
    size_t stack = reader_stack(items);
    job j = {path, out, err, SL_OK, false};
    int rc = run_on_stack(stack, load_thread, &j);
    if (rc != 0)
        return sl_error_set(err, rc == EAGAIN || rc == ENOMEM ? SL_ENOMEM : SL_EINTERNAL,
                            "%s: cannot start the reader with a %zu MB stack: %s", path,
                            stack >> 20, strerror(rc));
    return j.st;
}

} // extern "C"
