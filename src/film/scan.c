/*
 * Film scans (libtiff) and robust region statistics.
 *
 * A flatbed scan of radiochromic film is a TIFF of 16 bits a channel, RGB or
 * grey (common practice; AAPM TG-235). libtiff decodes it, whatever its
 * compression, strips or tiles; libtiff's messages are caught per file
 * (TIFFOpenExt with handlers) so that nothing is printed and the first error
 * becomes the one-line message. The pixel size comes from the resolution
 * tags, because a wrong pixel size moves every edge: without tags the caller
 * must give it. An 8-bit scan is read with a warning (256 levels are too
 * coarse for doses of a few cGy).
 *
 * Region means are robust: dust, scratches and marker dots are single dark
 * or bright pixels far from the rest, so values beyond SL_FILM_CLIP_SIGMAS
 * robust standard deviations of the median are left out before the mean.
 */
#include "strayline/film.h"

#include <math.h>
#include <stdarg.h>
#include <stdlib.h>
#include <string.h>

#include <tiffio.h>

typedef struct tiff_ctx {
    char msg[512];
} tiff_ctx;

static int tiff_on_error(TIFF *tif, void *user, const char *module, const char *fmt, va_list ap)
{
    (void)tif;
    (void)module;
    tiff_ctx *c = user;
    if (!c->msg[0])
        vsnprintf(c->msg, sizeof c->msg, fmt, ap);
    return 1;
}

static int tiff_on_warning(TIFF *tif, void *user, const char *module, const char *fmt,
                           va_list ap)
{
    /* Warnings (unknown private tags of scanner software) do not concern the pixels. */
    (void)tif;
    (void)user;
    (void)module;
    (void)fmt;
    (void)ap;
    return 1;
}

const char *sl_film_channel_name(int channel)
{
    switch (channel) {
    case SL_FILM_RED: return "red";
    case SL_FILM_GREEN: return "green";
    case SL_FILM_BLUE: return "blue";
    case SL_FILM_GREY: return "grey";
    default: return "?";
    }
}

const uint16_t *sl_film_plane(const sl_film_scan *s, int channel)
{
    if (!s || !s->pix || channel < 0 || channel > SL_FILM_GREY)
        return NULL;
    size_t plane = s->width * s->height;
    if (s->channels == 1)
        return s->pix;
    if (channel == SL_FILM_GREY)
        return NULL;
    return s->pix + (size_t)channel * plane;
}

void sl_film_scan_free(sl_film_scan *s)
{
    if (!s)
        return;
    free(s->path);
    free(s->pix);
    sl_notes_free(&s->notes);
    free(s);
}

/* Store sample `v` (in the file's bits) of channel c at (x, y). */
static inline void put(sl_film_scan *s, int c, size_t x, size_t y, unsigned v, bool inverted)
{
    if (inverted)
        v = (unsigned)s->max_value - v;
    s->pix[(size_t)c * s->width * s->height + y * s->width + x] = (uint16_t)v;
}

static unsigned sample_at(const unsigned char *buf, size_t i, int bits)
{
    if (bits == 16) {
        uint16_t v;
        memcpy(&v, buf + 2 * i, 2);
        return v;
    }
    return buf[i];
}

sl_status sl_film_scan_read(const char *path, double dpi, sl_film_scan **out, sl_error *err)
{
    *out = NULL;
    tiff_ctx ctx = {{0}};
    TIFFOpenOptions *oo = TIFFOpenOptionsAlloc();
    if (!oo)
        return sl_error_set(err, SL_ENOMEM, "%s: out of memory", path);
    TIFFOpenOptionsSetErrorHandlerExtR(oo, tiff_on_error, &ctx);
    TIFFOpenOptionsSetWarningHandlerExtR(oo, tiff_on_warning, &ctx);
    TIFFOpenOptionsSetMaxSingleMemAlloc(oo, (tmsize_t)256 << 20);
    TIFF *tif = TIFFOpenExt(path, "r", oo);
    TIFFOpenOptionsFree(oo);
    if (!tif)
        return sl_error_set(err, SL_EINPUT, "%s: not a readable TIFF scan (%s)", path,
                            ctx.msg[0] ? ctx.msg : "libtiff could not open it");

    sl_status st = SL_OK;
    sl_film_scan *s = calloc(1, sizeof *s);
    unsigned char *buf = NULL;
    bool ok = true;
    if (!s || !(s->path = sl_strdup(path, &ok))) {
        st = sl_error_set(err, SL_ENOMEM, "%s: out of memory", path);
        goto fail;
    }
    uint32_t w = 0, h = 0;
    uint16_t bps = 0, spp = 1, photo = 0, planar = PLANARCONFIG_CONTIG, fmt = SAMPLEFORMAT_UINT;
    if (!TIFFGetField(tif, TIFFTAG_IMAGEWIDTH, &w) || !TIFFGetField(tif, TIFFTAG_IMAGELENGTH, &h)
        || w == 0 || h == 0) {
        st = sl_error_set(err, SL_EINPUT, "%s: ImageWidth/ImageLength: missing or zero", path);
        goto fail;
    }
    TIFFGetFieldDefaulted(tif, TIFFTAG_BITSPERSAMPLE, &bps);
    TIFFGetFieldDefaulted(tif, TIFFTAG_SAMPLESPERPIXEL, &spp);
    TIFFGetFieldDefaulted(tif, TIFFTAG_PLANARCONFIG, &planar);
    TIFFGetFieldDefaulted(tif, TIFFTAG_SAMPLEFORMAT, &fmt);
    if (!TIFFGetField(tif, TIFFTAG_PHOTOMETRIC, &photo)) {
        st = sl_error_set(err, SL_EINPUT, "%s: PhotometricInterpretation: missing", path);
        goto fail;
    }
    if (bps != 8 && bps != 16) {
        st = sl_error_set(err, SL_EINPUT,
                          "%s: BitsPerSample: %u bits a channel (a film scan needs 16, or 8 "
                          "with a warning)",
                          path, (unsigned)bps);
        goto fail;
    }
    if (fmt != SAMPLEFORMAT_UINT) {
        st = sl_error_set(err, SL_EINPUT, "%s: SampleFormat: not unsigned integers", path);
        goto fail;
    }
    bool inverted = false;
    if (photo == PHOTOMETRIC_RGB && spp >= 3)
        s->channels = 3;
    else if ((photo == PHOTOMETRIC_MINISBLACK || photo == PHOTOMETRIC_MINISWHITE) && spp >= 1) {
        s->channels = 1;
        inverted = photo == PHOTOMETRIC_MINISWHITE;
    } else {
        st = sl_error_set(err, SL_EINPUT,
                          "%s: PhotometricInterpretation: %u with %u samples a pixel (a film "
                          "scan is RGB or grey)",
                          path, (unsigned)photo, (unsigned)spp);
        goto fail;
    }
    if ((size_t)w * h > SL_FILM_MAX_PIXELS) {
        st = sl_error_set(err, SL_EINPUT, "%s: %u x %u pixels: larger than the %zu read", path,
                          (unsigned)w, (unsigned)h, (size_t)SL_FILM_MAX_PIXELS);
        goto fail;
    }
    s->width = w;
    s->height = h;
    s->bits = bps;
    s->max_value = bps == 16 ? 65535.0 : 255.0;
    s->pix = malloc((size_t)w * h * (size_t)s->channels * sizeof *s->pix);
    if (!s->pix) {
        st = sl_error_set(err, SL_ENOMEM, "%s: out of memory for %u x %u pixels", path,
                          (unsigned)w, (unsigned)h);
        goto fail;
    }
    size_t bytes = bps / 8;
    if (TIFFIsTiled(tif)) {
        uint32_t tw = 0, th = 0;
        TIFFGetField(tif, TIFFTAG_TILEWIDTH, &tw);
        TIFFGetField(tif, TIFFTAG_TILELENGTH, &th);
        tmsize_t tsize = TIFFTileSize(tif);
        if (tw == 0 || th == 0 || tsize <= 0 || !(buf = malloc((size_t)tsize))) {
            st = sl_error_set(err, SL_EINPUT, "%s: TileWidth/TileLength: unusable tiles", path);
            goto fail;
        }
        int nplanes = planar == PLANARCONFIG_SEPARATE ? s->channels : 1;
        for (int pl = 0; pl < nplanes; pl++)
            for (uint32_t ty = 0; ty < h; ty += th)
                for (uint32_t tx = 0; tx < w; tx += tw) {
                    if (TIFFReadTile(tif, buf, tx, ty, 0, (uint16_t)pl) < 0) {
                        st = sl_error_set(err, SL_EINPUT, "%s: tile at (%u, %u): %s", path,
                                          (unsigned)tx, (unsigned)ty,
                                          ctx.msg[0] ? ctx.msg : "cannot be decoded");
                        goto fail;
                    }
                    for (uint32_t y = ty; y < ty + th && y < h; y++)
                        for (uint32_t x = tx; x < tx + tw && x < w; x++) {
                            size_t k = (size_t)(y - ty) * tw + (x - tx);
                            if (planar == PLANARCONFIG_SEPARATE)
                                put(s, pl, x, y, sample_at(buf, k, bps), inverted);
                            else
                                for (int c = 0; c < s->channels; c++)
                                    put(s, c, x, y, sample_at(buf, k * spp + c, bps), inverted);
                        }
                }
    } else {
        tmsize_t lsize = TIFFScanlineSize(tif);
        size_t need = planar == PLANARCONFIG_SEPARATE ? (size_t)w * bytes
                                                       : (size_t)w * spp * bytes;
        if (lsize <= 0 || (size_t)lsize < need || !(buf = malloc((size_t)lsize))) {
            st = sl_error_set(err, SL_EINPUT, "%s: StripByteCounts: unusable scan lines", path);
            goto fail;
        }
        int nplanes = planar == PLANARCONFIG_SEPARATE ? s->channels : 1;
        for (int pl = 0; pl < nplanes; pl++)
            for (uint32_t y = 0; y < h; y++) {
                if (TIFFReadScanline(tif, buf, y, (uint16_t)pl) < 0) {
                    st = sl_error_set(err, SL_EINPUT, "%s: scan line %u: %s", path,
                                      (unsigned)y, ctx.msg[0] ? ctx.msg : "cannot be decoded");
                    goto fail;
                }
                for (uint32_t x = 0; x < w; x++) {
                    if (planar == PLANARCONFIG_SEPARATE)
                        put(s, pl, x, y, sample_at(buf, x, bps), inverted);
                    else
                        for (int c = 0; c < s->channels; c++)
                            put(s, c, x, y, sample_at(buf, (size_t)x * spp + c, bps), inverted);
                }
            }
    }

    /* The pixel size. */
    float xres = 0, yres = 0;
    uint16_t unit = RESUNIT_INCH;
    bool have_x = TIFFGetField(tif, TIFFTAG_XRESOLUTION, &xres) && isfinite(xres) && xres > 0;
    bool have_y = TIFFGetField(tif, TIFFTAG_YRESOLUTION, &yres) && isfinite(yres) && yres > 0;
    TIFFGetFieldDefaulted(tif, TIFFTAG_RESOLUTIONUNIT, &unit);
    double tag_dpi = NAN;
    if (have_x && unit != RESUNIT_NONE) {
        double per_cm_x = unit == RESUNIT_CENTIMETER ? xres : xres / 2.54;
        if (have_y) {
            double per_cm_y = unit == RESUNIT_CENTIMETER ? yres : yres / 2.54;
            if (fabs(per_cm_y - per_cm_x) > 0.01 * per_cm_x) {
                st = sl_error_set(err, SL_EINPUT,
                                  "%s: XResolution/YResolution: pixels not square (%g and %g "
                                  "a cm)",
                                  path, per_cm_x, per_cm_y);
                goto fail;
            }
        }
        tag_dpi = per_cm_x * 2.54;
    }
    if (dpi > 0) {
        s->pixel_cm = 2.54 / dpi;
        if (isfinite(tag_dpi) && fabs(tag_dpi - dpi) > 0.005 * dpi &&
            sl_notes_add(&s->notes, "%s: the resolution tags say %.6g dpi; %.6g dpi as given is used",
                         path, tag_dpi, dpi) != SL_OK) {
            st = sl_error_set(err, SL_ENOMEM, "out of memory");
            goto fail;
        }
    } else if (isfinite(tag_dpi)) {
        s->pixel_cm = 2.54 / tag_dpi;
        s->dpi_from_tags = true;
    } else {
        st = sl_error_set(err, SL_EINPUT,
                          "%s: XResolution/ResolutionUnit: no pixel size in the file (give "
                          "--dpi)",
                          path);
        goto fail;
    }
    if (bps == 8 &&
        sl_notes_add(&s->notes,
                     "%s: an 8-bit scan: 256 levels a channel are too coarse for doses of a few "
                     "cGy (scan at 16 bits a channel)",
                     path) != SL_OK) {
        st = sl_error_set(err, SL_ENOMEM, "out of memory");
        goto fail;
    }
    if (inverted && sl_notes_add(&s->notes, "%s: a min-is-white grey scan, inverted", path) != SL_OK) {
        st = sl_error_set(err, SL_ENOMEM, "out of memory");
        goto fail;
    }
    free(buf);
    TIFFClose(tif);
    if ((st = sl_sha256_file(path, s->sha256, err)) != SL_OK) {
        sl_film_scan_free(s);
        return st;
    }
    *out = s;
    return SL_OK;
fail:
    free(buf);
    TIFFClose(tif);
    sl_film_scan_free(s);
    return st;
}

static int cmp_double(const void *a, const void *b)
{
    double x = *(const double *)a, y = *(const double *)b;
    return (x > y) - (x < y);
}

static double median_sorted(const double *v, size_t n)
{
    return n % 2 ? v[n / 2] : 0.5 * (v[n / 2 - 1] + v[n / 2]);
}

void sl_film_robust(double *v, size_t n, sl_film_stats *st)
{
    memset(st, 0, sizeof *st);
    st->n = n;
    if (n == 0) {
        st->mean = st->sd = st->sem = st->median = NAN;
        return;
    }
    qsort(v, n, sizeof *v, cmp_double);
    double med = median_sorted(v, n);
    double *dev = malloc(n * sizeof *dev);
    double mad = 0;
    if (dev) {
        for (size_t i = 0; i < n; i++)
            dev[i] = fabs(v[i] - med);
        qsort(dev, n, sizeof *dev, cmp_double);
        mad = median_sorted(dev, n);
        free(dev);
    }
    /* A floor of one count, so that an 8-bit scan with most pixels on one level keeps them. */
    double lim = SL_FILM_CLIP_SIGMAS * fmax(1.4826 * mad, 1.0);
    double sum = 0, sum2 = 0;
    size_t m = 0;
    for (size_t i = 0; i < n; i++)
        if (fabs(v[i] - med) <= lim) {
            sum += v[i];
            m++;
        }
    double mean = sum / (double)m;
    for (size_t i = 0; i < n; i++)
        if (fabs(v[i] - med) <= lim)
            sum2 += (v[i] - mean) * (v[i] - mean);
    st->median = med;
    st->mean = mean;
    st->n_used = m;
    st->sd = m > 1 ? sqrt(sum2 / (double)(m - 1)) : 0.0;
    st->sem = st->sd / sqrt((double)m);
}

sl_status sl_film_region_stats(const sl_film_scan *s, int channel, long x0, long y0, long x1,
                               long y1, sl_film_stats *st, sl_error *err)
{
    memset(st, 0, sizeof *st);
    const uint16_t *pl = sl_film_plane(s, channel);
    if (!pl)
        return sl_error_set(err, SL_EINPUT, "%s: the scan has no %s channel", s->path,
                            sl_film_channel_name(channel));
    if (x0 < 0 || y0 < 0 || x1 > (long)s->width || y1 > (long)s->height || x1 <= x0 ||
        y1 <= y0)
        return sl_error_set(err, SL_EINPUT,
                            "region of pixels x %ld..%ld, y %ld..%ld: outside the %zu x %zu "
                            "image or empty",
                            x0, x1, y0, y1, s->width, s->height);
    size_t n = (size_t)(x1 - x0) * (size_t)(y1 - y0);
    double *v = malloc(n * sizeof *v);
    if (!v)
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    size_t k = 0, bad = 0;
    for (long y = y0; y < y1; y++)
        for (long x = x0; x < x1; x++) {
            uint16_t p = pl[(size_t)y * s->width + (size_t)x];
            if (p == 0 || p >= s->max_value)
                bad++;
            else
                v[k++] = p;
        }
    if ((double)bad > SL_FILM_MAX_SATURATED_SHARE * (double)n || k == 0) {
        free(v);
        return sl_error_set(err, SL_EINPUT,
                            "region of pixels x %ld..%ld, y %ld..%ld: %zu of %zu %s pixels "
                            "saturated or empty (at most %.0f %% allowed)",
                            x0, x1, y0, y1, bad, n, sl_film_channel_name(channel),
                            100 * SL_FILM_MAX_SATURATED_SHARE);
    }
    sl_film_robust(v, k, st);
    st->n = n;
    st->n_saturated = bad;
    free(v);
    return SL_OK;
}
