/*
 * A DICOM file's bytes before DCMTK sees them (internal to src/dicom/: not a
 * public header). The full reader (rt_read.cc) and the header reader
 * (header_read.cc) apply the same guards, so they share them here: a file
 * that does not start like DICOM is refused, the file is read after its
 * size is checked, the sequence items are counted (every level of nesting
 * needs one), and DCMTK's recursive parser runs on a thread whose stack has
 * room for every level the bytes allow.
 */
#ifndef STRAYLINE_DICOM_RAW_FILE_H
#define STRAYLINE_DICOM_RAW_FILE_H

#include "strayline/error.h"

#include <cstddef>

namespace sl_dicom_internal {

/* The "DICM" marker after the 128-byte preamble, or a bare data set's first
 * element of group 0002 or 0008 in either byte order. */
bool looks_like_dicom(const unsigned char *p, size_t n);
extern const char *const NOT_DICOM; /* the message when it does not */

/* Item tags (FFFE,E000) in either byte order. */
size_t count_item_tags(const unsigned char *p, size_t n);

/* A file's bytes, after the checks every reader makes (a regular file, not
 * empty, no larger than SL_DICOM_MAX_FILE_BYTES); errors name the path. */
struct raw_bytes {
    const unsigned char *data = nullptr;
    size_t size = 0;
};
sl_status raw_read_file(const char *path, raw_bytes *m, sl_error *err);
void raw_release(raw_bytes *m);

/* The stack a reader of that many items needs: 16 MB and
 * SL_DICOM_STACK_PER_LEVEL a level. */
size_t reader_stack(size_t items);

/* fn(arg) on a thread of that stack, joined; 0, or pthread's error when the
 * thread could not be started (fn did not run). */
int run_on_stack(size_t stack, void *(*fn)(void *), void *arg);

} // namespace sl_dicom_internal

#endif
