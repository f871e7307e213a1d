/*
 * Fuzz harness: the contour filler and the outline code, on polygons read
 * from the input bytes (little-endian 16-bit coordinates, tenths of a mm).
 * Byte 0 sets the number of loops (1-4) and byte 1 the contour type.
 */
#include <math.h>
#include <stdint.h>
#include <stdlib.h>
#include <string.h>

#include "strayline/outline.h"
#include "strayline/sampling.h"
#include "strayline/slices.h"
#include "strayline/surface.h"

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size);

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
    if (size < 8)
        return 0;
    size_t nloops = 1 + data[0] % 4;
    sl_contour_type type = data[1] % 2 ? SL_CONTOUR_CLOSED_PLANAR : SL_CONTOUR_CLOSEDPLANAR_XOR;
    const uint8_t *p = data + 2;
    size_t npairs = (size - 2) / 4;
    if (npairs > 400)
        npairs = 400;
    if (npairs < nloops * 3)
        return 0;
    size_t per = npairs / nloops;
    sl_roi roi;
    memset(&roi, 0, sizeof roi);
    roi.name = "fuzz";
    roi.contours = calloc(nloops * 2, sizeof *roi.contours);
    sl_outline_loop *loops = calloc(nloops, sizeof *loops);
    sl_vec2 *pts2 = malloc(npairs * sizeof *pts2);
    if (!roi.contours || !loops || !pts2)
        goto out;
    for (size_t k = 0; k < nloops; k++) {
        for (int slice = 0; slice < 2; slice++) {
            sl_contour *c = &roi.contours[roi.ncontours++];
            c->type = type;
            c->npoints = per;
            c->points = malloc(per * sizeof *c->points);
            if (!c->points)
                goto out;
            for (size_t i = 0; i < per; i++) {
                const uint8_t *q = p + 4 * (k * per + i);
                double x = (int16_t)(q[0] | q[1] << 8) * 0.1, y = (int16_t)(q[2] | q[3] << 8) * 0.1;
                c->points[i] = (sl_vec3){x, y, slice * 2.5};
                pts2[k * per + i] = (sl_vec2){x * 0.1, y * 0.1};
            }
        }
        loops[k] = (sl_outline_loop){pts2 + k * per, per};
    }
    sl_sampling_options opt;
    sl_sampling_default_options(&opt);
    opt.target_samples = 500;
    opt.max_pitch_cm = 50; /* coordinates reach metres: keep the sample count small */
    sl_organ_samples s;
    sl_error err = {0};
    if (sl_sample_roi(&roi, "fuzz", &opt, &s, &err) == SL_OK)
        sl_organ_samples_free(&s);
    sl_outline *o = NULL;
    if (sl_outline_create(loops, nloops, "fuzz", &o, &err) == SL_OK) {
        if (sl_outline_index(o, (sl_vec2){-40, -40}, (sl_vec2){40, 40}, &err) == SL_OK)
            for (int i = 0; i < 64; i++)
                sl_outline_distance(o, (sl_vec2){-50 + 1.6 * i, 30 - 0.9 * i});
        sl_outline_free(o);
    }
    sl_slice_stack st;
    if (sl_slices_build(&roi, "fuzz", 0.3, &st, &err) == SL_OK) {
        sl_body *b = NULL;
        if (st.nslices && sl_body_create(&st, "fuzz", &b, &err) == SL_OK) {
            for (int i = 0; i < 16; i++)
                sl_body_path(b, (sl_vec3){-80 + 10 * i, -100, 0.1 * i},
                             (sl_vec3){20 - 3 * i, 40, 0.2}, NULL);
            sl_body_free(b);
        }
        sl_slices_free(&st);
    }
out:
    for (size_t i = 0; i < roi.ncontours; i++)
        free(roi.contours[i].points);
    free(roi.contours);
    free(loops);
    free(pts2);
    return 0;
}
