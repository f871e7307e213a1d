/*
 * Test helper for tests/reference/test_pdfdicom.py: wraps a PDF file as a
 * DICOM Encapsulated PDF object through the library call the tool uses
 * (sl_dicom_write_pdf), so that the object can be checked with outside tools
 * (dciodvfy, dcmdump, pydicom) independently of how a command reaches it.
 *   pdf_dicom OUT.dcm PLAN.dcm DOCUMENT.pdf TITLE
 * Errors are one line on stderr, with the tool's exit codes (1, 2, 3).
 */
#include <stdio.h>
#include <stdlib.h>

#include "strayline/dicom.h"
#include "strayline/util.h"

int main(int argc, char **argv)
{
    if (argc != 5) {
        fprintf(stderr, "usage: pdf_dicom OUT.dcm PLAN.dcm DOCUMENT.pdf TITLE\n");
        return 2;
    }
    sl_error err = {0};
    char *pdf = NULL;
    size_t n = 0;
    sl_status st = sl_read_file(argv[3], (size_t)1 << 28, &pdf, &n, &err);
    if (st == SL_OK)
        st = sl_dicom_write_pdf(argv[1], argv[2], (const unsigned char *)pdf, n, argv[4], &err);
    free(pdf);
    if (st == SL_OK)
        return 0;
    fprintf(stderr, "pdf_dicom: %s\n", err.msg);
    return st == SL_EINPUT ? 3 : st == SL_EUSAGE ? 2 : 1;
}
