/*
 * Fuzz harness: the measurement-set loader (YAML; the profile CSV files it
 * names are read from tests/data/bad, where the good ones are csv/ok1.csv
 * and csv/ok2.csv), and commissioning of whatever loads.
 */
#include <stdint.h>
#include <stdlib.h>

#include "strayline/commission.h"
#include "strayline/measure.h"

#ifndef SL_FUZZ_DATA_DIR
#define SL_FUZZ_DATA_DIR "tests/data/bad"
#endif

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size);

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
    sl_measurement_set *ms = NULL;
    sl_error err = {0};
    if (sl_measurements_load_buffer((const char *)data, size, "fuzz.yaml", SL_FUZZ_DATA_DIR, &ms,
                                    &err) == SL_OK) {
        /* fitting is the slow part: a few profiles are enough to reach it */
        if (ms->nprofiles > 3) {
            sl_measurements_free(ms);
            return 0;
        }
        sl_commission_options opt = {"fuzz", "now", NULL, 1, NULL, NULL};
        sl_model *m = NULL;
        if (sl_commission(ms, &opt, &m, &err) == SL_OK)
            sl_model_free(m);
        sl_measurements_free(ms);
    }
    return 0;
}
