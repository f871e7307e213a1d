/*
 * strayline: a quick look at a DICOM file's identity, for sorting a folder.
 *
 * `scan` must classify every file of an export folder (plan, structure set,
 * image, not DICOM at all) and pair plans with structure sets before it
 * reads any of them fully. This reader (src/dicom/header_read.cc, DCMTK)
 * keeps long values (contour data, pixel data) on disk and copies only the
 * identifying elements. It decides nothing about whether an object can be
 * screened: the full reader (dicom.h) does that when the pair is screened.
 */
#ifndef STRAYLINE_DICOMHEAD_H
#define STRAYLINE_DICOMHEAD_H

#include "strayline/error.h"

#ifdef __cplusplus
extern "C" {
#endif

typedef enum sl_head_kind {
    SL_HEAD_RTPLAN,
    SL_HEAD_RTSTRUCT,
    SL_HEAD_RTDOSE, /* a planning system's dose grid: `scan` gives it to the plan it names */
    SL_HEAD_OTHER   /* a DICOM object of another SOP Class (an image, ...) */
} sl_head_kind;

/* UIDs are at most 64 characters (PS3.5 9.1); other values are cut to fit. */
#define SL_HEAD_UID 65
#define SL_HEAD_TEXT 129

typedef struct sl_dicom_head {
    sl_head_kind kind;
    char sop_class_uid[SL_HEAD_UID];
    char sop_instance_uid[SL_HEAD_UID];
    char patient_id[SL_HEAD_TEXT];
    char label[SL_HEAD_TEXT];        /* RT Plan Label or Structure Set Label */
    char frame_uid[SL_HEAD_UID];     /* plan and RT Dose: Frame of Reference UID; structure
                                        set: the first Referenced Frame of Reference UID; "" */
    char structure_set_uid[SL_HEAD_UID]; /* plan: Referenced Structure Set; "" */
    char plan_ref_uid[SL_HEAD_UID];  /* RT Dose: Referenced RT Plan Sequence > Referenced
                                        SOP Instance UID (the first item); "" */
    char summation[17];              /* RT Dose: Dose Summation Type (PLAN, BEAM, ...); "" */
    int nbeams;                      /* plan: items of the Beam Sequence */
    int electron_beams;              /* plan: of those, Radiation Type ELECTRON */
} sl_dicom_head;

/* Read the identity of a DICOM file. Not DICOM, truncated before the
 * identifying elements, or a UID that breaks the UID grammar: input error. */
sl_status sl_dicom_read_head(const char *path, sl_dicom_head *out, sl_error *err);

/* 1 when two DICOM files hold the same data set, element for element,
 * whatever their transfer syntaxes and file meta information; 0 when they
 * differ or one cannot be read. */
int sl_dicom_same_data_set(const char *a, const char *b);

/* Is s a valid DICOM UID (digits and dots, components without leading
 * zeros, at most 64 characters)? Used before a UID becomes a file name. */
int sl_dicom_uid_valid(const char *s);

#ifdef __cplusplus
}
#endif

#endif
