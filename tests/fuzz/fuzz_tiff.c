/*
 * Fuzz harness: the film scan reader (libtiff through sl_film_scan_read) and
 * the robust statistics of the whole image. The reader takes a path, so each
 * input goes through a temporary file.
 */
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <unistd.h>

#include "strayline/film.h"

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size);

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
    char path[] = "/tmp/sl-fuzz-tiff-XXXXXX";
    int fd = mkstemp(path);
    if (fd < 0)
        return 0;
    FILE *f = fdopen(fd, "wb");
    if (!f) {
        close(fd);
        unlink(path);
        return 0;
    }
    fwrite(data, 1, size, f);
    fclose(f);
    sl_film_scan *s = NULL;
    sl_error err = {0};
    if (sl_film_scan_read(path, 0, &s, &err) == SL_OK ||
        sl_film_scan_read(path, 100, &s, &err) == SL_OK) {
        sl_film_stats st;
        for (int c = 0; c < 4; c++)
            sl_film_region_stats(s, c, 0, 0, (long)s->width, (long)s->height, &st, &err);
        sl_film_scan_free(s);
    }
    unlink(path);
    return 0;
}
