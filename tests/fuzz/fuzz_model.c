/*
 * Fuzz harness: the model file loader, and an evaluation of whatever loads.
 */
#include <stdint.h>
#include <stdio.h>

#include "strayline/model.h"
#include "strayline/report.h"

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size);

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
    sl_model *m = NULL;
    sl_error err = {0};
    if (sl_model_load_buffer((const char *)data, size, "fuzz.yaml", &m, &err) == SL_OK) {
        for (size_t i = 0; i < m->nprofiles && i < 4; i++) {
            sl_model_value v;
            const sl_model_profile *p = &m->profiles[i];
            for (double d = -1; d < 60; d += 7.5)
                sl_model_eval(m, p->energy_mev, p->applicator, p->insert, p->depth_cm + 0.3, d,
                              i % 2 ? SL_EVAL_POINTS : SL_EVAL_FIT, &v, &err);
        }
        FILE *null = fopen("/dev/null", "w");
        if (null) {
            sl_model_write(m, null, &err);
            sl_report_model(null, SL_FORMAT_JSON, m, &err);
            fclose(null);
        }
        sl_model_free(m);
    }
    return 0;
}
