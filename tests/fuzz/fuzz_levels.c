/*
 * Fuzz harness: the action-level table loader and ROI-name matching.
 */
#include <math.h>
#include <stdint.h>

#include "strayline/levels.h"

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size);

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
    sl_levels *l = NULL;
    sl_error err = {0};
    if (sl_levels_load_buffer((const char *)data, size, "fuzz.yaml", &l, &err) == SL_OK) {
        const char *names[] = {"Lens_L", "Pacemaker", "Fetus", "Thyroid", "x"};
        for (size_t i = 0; i < 5; i++)
            sl_levels_match(l, names[i]);
        for (size_t i = 0; i < l->ntables; i++)
            sl_lar_cases(&l->tables[i], 'F', 33, 0.1);
        sl_levels_free(l);
    }
    return 0;
}
