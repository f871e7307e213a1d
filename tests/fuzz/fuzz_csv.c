/*
 * Fuzz harness: the profile CSV reader and edge finder. The first byte
 * chooses whether a central-axis reading is given.
 */
#include <math.h>
#include <stdint.h>
#include <string.h>

#include "strayline/measure.h"
#include "strayline/profile.h"

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size);

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
    if (size < 1)
        return 0;
    sl_profile_data p;
    memset(&p, 0, sizeof p);
    p.rel_uncertainty = 0.02;
    p.floor_percent = 0.01;
    sl_notes notes = {0};
    sl_error err = {0};
    double cax = data[0] & 1 ? 2.5 : NAN;
    if (sl_profile_parse_csv((const char *)data + 1, size - 1, "fuzz.csv", cax, 10.0, &p, &notes,
                             &err) == SL_OK) {
        sl_profile_fit f;
        if (p.n <= 60)
            sl_profile_fit_data(p.distance_cm, p.dose_percent, p.sigma_percent, p.n, "fuzz", &f,
                                &err);
    }
    sl_profile_data_free(&p);
    sl_notes_free(&notes);
    return 0;
}
