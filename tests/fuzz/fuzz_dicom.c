/*
 * Fuzz harness: the DICOM reader (RT Plan and RT Structure Set) from a
 * memory buffer. Every input must give SL_OK or a clean error, never a
 * crash, a leak or undefined behaviour; an object that reads must also
 * survive the plan/structure checks and the inspect writer.
 */
#include <stdint.h>
#include <stdio.h>

#include "strayline/dicom.h"
#include "strayline/report.h"

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size);

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
    sl_dicom_object obj;
    sl_error err = {0};
    if (sl_dicom_read_buffer(data, size, "fuzz.dcm", &obj, &err) == SL_OK) {
        FILE *null = fopen("/dev/null", "w");
        if (null) {
            sl_report_inspect(null, SL_FORMAT_JSON, &obj, 1, &err);
            fclose(null);
        }
        sl_dicom_object_free(&obj);
    }
    return 0;
}
