/*
 * strayline: the DICOM input stage, a plain C API over DCMTK.
 *
 * The implementation (src/dicom/, C++17) is the only code that includes a
 * DCMTK header. It reads an RT Plan or an RT Structure Set, from a file or a
 * memory buffer, with or without the file meta header, in any transfer
 * syntax DCMTK reads, checks every count and every number it copies, and
 * returns the plain structs of plan.h and structures.h. Errors name the
 * file, the element (keyword and tag) and what was wrong.
 */
#ifndef STRAYLINE_DICOM_H
#define STRAYLINE_DICOM_H

#include <stddef.h>

#include "strayline/error.h"
#include "strayline/plan.h"
#include "strayline/structures.h"

#ifdef __cplusplus
extern "C" {
#endif

/* Largest input file accepted (bytes) and largest total number of contour
 * points in one structure set: beyond these an input error, not a swap storm. */
#define SL_DICOM_MAX_FILE_BYTES ((size_t)1 << 30)
/* Sequences nested deeper than this are refused (an RT Plan needs about 4
 * levels); the reader's stack is sized for the nesting a file's bytes allow,
 * at most SL_DICOM_MAX_ITEMS sequence items, each SL_DICOM_STACK_PER_LEVEL
 * bytes of stack (measured with 400,000 nested sequences: a plain build
 * needs between 1 and 2 KB a level; 8 KB also covers AddressSanitizer). */
#define SL_DICOM_MAX_NESTING 64
#define SL_DICOM_MAX_ITEMS 1000000
#define SL_DICOM_STACK_PER_LEVEL 8192
#define SL_DICOM_MAX_CONTOUR_POINTS ((size_t)20000000)

typedef enum sl_dicom_kind {
    SL_DICOM_RTPLAN,
    SL_DICOM_RTSTRUCT
} sl_dicom_kind;

/* A DICOM object read from one file: exactly one of plan / structures is set. */
typedef struct sl_dicom_object {
    sl_dicom_kind kind;
    sl_plan *plan;
    sl_structure_set *structures;
} sl_dicom_object;

/* Read a file that must be an RT Plan or an RT Structure Set. Any other kind
 * of DICOM object (an image, an RT Dose, an RT Ion Plan) is an input error
 * naming its SOP Class. */
sl_status sl_dicom_read(const char *path, sl_dicom_object *out, sl_error *err);

/* The same from a memory buffer; `name` stands for the file in messages. */
sl_status sl_dicom_read_buffer(const void *data, size_t size, const char *name,
                               sl_dicom_object *out, sl_error *err);

/* Read a file that must be an RT Plan (or an RT Structure Set). */
sl_status sl_dicom_read_plan(const char *path, sl_plan **out, sl_error *err);
sl_status sl_dicom_read_structures(const char *path, sl_structure_set **out, sl_error *err);

void sl_dicom_object_free(sl_dicom_object *obj);

/* DCMTK's version string, for reports. */
const char *sl_dicom_toolkit_version(void);

/* Write `pdf` (pdf_len bytes, a PDF) to out_path as a DICOM Encapsulated PDF
 * object (PS3.3 A.45.1) in the patient and study of the RT Plan at plan_path:
 * the plan's Patient, Patient Study and General Study attributes, a new
 * series (Modality DOC), a new SOP Instance UID, Document Title = title
 * (UTF-8, one line, at most 1024 characters; NULL for none), Burned In Annotation YES.
 * Explicit VR Little Endian with a file meta header, written atomically and
 * never over the plan. SL_EINPUT names the plan and the element (unreadable,
 * not an RT Plan, no Study Instance UID); SL_EUSAGE a title that a DICOM ST
 * value cannot hold; SL_EIO an output that cannot be written. */
sl_status sl_dicom_write_pdf(const char *out_path, const char *plan_path,
                             const unsigned char *pdf, size_t pdf_len, const char *title,
                             sl_error *err);

#ifdef __cplusplus
}
#endif

#endif
