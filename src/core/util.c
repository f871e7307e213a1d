/*
 * Shared helpers: strict number parsing, strings, hashing (nettle), bounded
 * file reading and atomic output files (see include/strayline/util.h).
 */
#define _POSIX_C_SOURCE 200809L
#include "strayline/util.h"

#include <gsl/gsl_errno.h>
#include <pthread.h>

#include <ctype.h>
#include <errno.h>
#include <limits.h>
#include <math.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>

#include <nettle/sha2.h>

int sl_decimals_below(double v, double level, int dec)
{
    if (!(isfinite(v) && isfinite(level) && v < level))
        return dec;
    char b[400];
    for (int d = dec; d < 6; d++) {
        snprintf(b, sizeof b, "%.*f", d, v);
        if (strtod(b, NULL) < level)
            return d;
    }
    return 6;
}

bool sl_parse_double(const char *text, double *out)
{
    if (!text)
        return false;
    while (isspace((unsigned char)*text))
        text++;
    if (*text == '\0')
        return false;
    /* strtod accepts "nan", "inf" and hex floats: none belongs in a
     * clinical input file, so only decimal notation is allowed. */
    for (const char *p = text; *p; p++) {
        if (!(isdigit((unsigned char)*p) || *p == '.' || *p == '-' || *p == '+' || *p == 'e' ||
              *p == 'E' || isspace((unsigned char)*p)))
            return false;
    }
    errno = 0;
    char *end = NULL;
    double v = strtod(text, &end);
    if (end == text || errno == ERANGE || !isfinite(v))
        return false;
    while (isspace((unsigned char)*end))
        end++;
    if (*end != '\0')
        return false;
    *out = v;
    return true;
}

bool sl_parse_int(const char *text, int *out)
{
    if (!text)
        return false;
    while (isspace((unsigned char)*text))
        text++;
    if (*text == '\0')
        return false;
    errno = 0;
    char *end = NULL;
    long v = strtol(text, &end, 10);
    if (end == text || errno == ERANGE || v < INT_MIN || v > INT_MAX)
        return false;
    while (isspace((unsigned char)*end))
        end++;
    if (*end != '\0')
        return false;
    *out = (int)v;
    return true;
}

char *sl_strdup(const char *s, bool *ok)
{
    if (!s)
        return NULL;
    size_t n = strlen(s) + 1;
    char *d = malloc(n);
    if (!d) {
        if (ok)
            *ok = false;
        return NULL;
    }
    memcpy(d, s, n);
    return d;
}

int sl_strcasecmp(const char *a, const char *b)
{
    for (;; a++, b++) {
        int ca = tolower((unsigned char)*a), cb = tolower((unsigned char)*b);
        if (ca != cb || ca == 0)
            return ca - cb;
    }
}

static void hex_digest(const uint8_t digest[SHA256_DIGEST_SIZE], char hex[SL_SHA256_HEX_LEN])
{
    static const char digits[] = "0123456789abcdef";
    for (size_t i = 0; i < SHA256_DIGEST_SIZE; i++) {
        hex[2 * i] = digits[digest[i] >> 4];
        hex[2 * i + 1] = digits[digest[i] & 15];
    }
    hex[2 * SHA256_DIGEST_SIZE] = '\0';
}

void sl_sha256_buffer(const void *data, size_t n, char hex[SL_SHA256_HEX_LEN])
{
    struct sha256_ctx ctx;
    uint8_t digest[SHA256_DIGEST_SIZE];
    sha256_init(&ctx);
    sha256_update(&ctx, n, data);
    sha256_digest(&ctx, sizeof digest, digest);
    hex_digest(digest, hex);
}

sl_status sl_sha256_file(const char *path, char hex[SL_SHA256_HEX_LEN], sl_error *err)
{
    FILE *fp = fopen(path, "rb");
    if (!fp)
        return sl_error_set(err, SL_EINPUT, "%s: cannot open: %s", path, strerror(errno));
    struct sha256_ctx ctx;
    sha256_init(&ctx);
    unsigned char chunk[65536];
    size_t n;
    while ((n = fread(chunk, 1, sizeof chunk, fp)) > 0)
        sha256_update(&ctx, n, chunk);
    int bad = ferror(fp);
    fclose(fp);
    if (bad)
        return sl_error_set(err, SL_EINPUT, "%s: read error", path);
    uint8_t digest[SHA256_DIGEST_SIZE];
    sha256_digest(&ctx, sizeof digest, digest);
    hex_digest(digest, hex);
    return SL_OK;
}

sl_status sl_read_file(const char *path, size_t max_bytes, char **data, size_t *size,
                       sl_error *err)
{
    *data = NULL;
    *size = 0;
    FILE *fp = fopen(path, "rb");
    if (!fp)
        return sl_error_set(err, SL_EINPUT, "%s: cannot open: %s", path, strerror(errno));
    struct stat sb;
    if (fstat(fileno(fp), &sb) != 0 || !S_ISREG(sb.st_mode)) {
        fclose(fp);
        return sl_error_set(err, SL_EINPUT, "%s: not a regular file", path);
    }
    if ((unsigned long long)sb.st_size > max_bytes) {
        fclose(fp);
        return sl_error_set(err, SL_EINPUT, "%s: file is %lld bytes, more than the limit of %zu",
                            path, (long long)sb.st_size, max_bytes);
    }
    size_t cap = (size_t)sb.st_size;
    char *buf = malloc(cap + 1);
    if (!buf) {
        fclose(fp);
        return sl_error_set(err, SL_ENOMEM, "%s: out of memory reading the file", path);
    }
    size_t n = fread(buf, 1, cap, fp);
    int bad = ferror(fp);
    fclose(fp);
    if (bad) {
        free(buf);
        return sl_error_set(err, SL_EINPUT, "%s: read error", path);
    }
    buf[n] = '\0';
    *data = buf;
    *size = n;
    return SL_OK;
}

bool sl_same_file(const char *a, const char *b)
{
    struct stat sa, sb;
    if (stat(a, &sa) != 0 || stat(b, &sb) != 0)
        return false;
    return sa.st_dev == sb.st_dev && sa.st_ino == sb.st_ino;
}

sl_status sl_outfile_open(sl_outfile *out, const char *path, const char *const *inputs,
                          size_t n_inputs, sl_error *err)
{
    memset(out, 0, sizeof *out);
    for (size_t i = 0; i < n_inputs; i++) {
        if (inputs[i] && sl_same_file(path, inputs[i]))
            return sl_error_set(err, SL_EUSAGE, "%s: refusing to write over an input file",
                                path);
    }
    struct stat sb;
    if (stat(path, &sb) == 0 && !S_ISREG(sb.st_mode))
        return sl_error_set(err, SL_EIO, "%s: exists and is not a regular file: cannot write "
                                         "the output there",
                            path);
    /* A missing folder is the usual mistake: say so, not what mkstemp says. */
    const char *slash = strrchr(path, '/');
    if (slash && slash != path) {
        size_t dn = (size_t)(slash - path);
        char *dir = malloc(dn + 1);
        if (!dir)
            return sl_error_set(err, SL_ENOMEM, "%s: out of memory", path);
        memcpy(dir, path, dn);
        dir[dn] = '\0';
        bool missing = stat(dir, &sb) != 0 || !S_ISDIR(sb.st_mode);
        if (missing)
            sl_error_set(err, SL_EIO, "%s: no such directory: %s", path, dir);
        free(dir);
        if (missing)
            return SL_EIO;
    }
    bool ok = true;
    out->target = sl_strdup(path, &ok);
    size_t n = strlen(path) + 16;
    out->tmp = malloc(n);
    if (!ok || !out->tmp) {
        sl_outfile_abort(out);
        return sl_error_set(err, SL_ENOMEM, "%s: out of memory", path);
    }
    snprintf(out->tmp, n, "%s.tmpXXXXXX", path);
    int fd = mkstemp(out->tmp);
    if (fd < 0) {
        int e = errno;
        free(out->tmp);
        out->tmp = NULL;
        sl_outfile_abort(out);
        return sl_error_set(err, SL_EIO, "%s: cannot create a temporary file beside it: %s",
                            path, strerror(e));
    }
    out->fp = fdopen(fd, "wb");
    if (!out->fp) {
        close(fd);
        sl_outfile_abort(out);
        return sl_error_set(err, SL_EIO, "%s: cannot open for writing", path);
    }
    return SL_OK;
}

sl_status sl_outfile_commit(sl_outfile *out, sl_error *err)
{
    if (!out->fp)
        return sl_error_set(err, SL_EINTERNAL, "output file committed twice");
    /* the system's reason (a full disk) is kept from the first step that
     * failed, before removing the temporary file can change errno */
    int bad = ferror(out->fp), why = 0;
    if (fflush(out->fp) != 0 && !why)
        why = errno, bad = 1;
    if (fsync(fileno(out->fp)) != 0 && !why)
        why = errno, bad = 1;
    if (fclose(out->fp) != 0 && !why)
        why = errno, bad = 1;
    out->fp = NULL;
    if (bad) {
        sl_error_set(err, SL_EIO, "%s: write failed: %s", out->target,
                     why ? strerror(why) : "an earlier write to it failed");
        sl_outfile_abort(out);
        return SL_EIO;
    }
    /* mkstemp gives 0600; a report is meant to be shared like any file. */
    mode_t mask = umask(0);
    umask(mask);
    chmod(out->tmp, 0666 & ~mask);
    if (rename(out->tmp, out->target) != 0) {
        int e = errno;
        sl_error_set(err, SL_EIO, "%s: cannot rename the temporary file into place: %s",
                     out->target, strerror(e));
        sl_outfile_abort(out);
        return SL_EIO;
    }
    free(out->tmp);
    free(out->target);
    out->tmp = out->target = NULL;
    return SL_OK;
}

void sl_outfile_abort(sl_outfile *out)
{
    if (out->fp) {
        fclose(out->fp);
        out->fp = NULL;
    }
    if (out->tmp) {
        unlink(out->tmp);
        free(out->tmp);
        out->tmp = NULL;
    }
    free(out->target);
    out->target = NULL;
}

void sl_buf_append(sl_buf *b, const char *s, size_t n)
{
    if (b->failed)
        return;
    if (b->len + n + 1 > b->cap) {
        size_t cap = b->cap ? b->cap : 256;
        while (cap < b->len + n + 1)
            cap *= 2;
        char *d = realloc(b->data, cap);
        if (!d) {
            b->failed = true;
            return;
        }
        b->data = d;
        b->cap = cap;
    }
    memcpy(b->data + b->len, s, n);
    b->len += n;
    b->data[b->len] = '\0';
}

void sl_buf_printf(sl_buf *b, const char *fmt, ...)
{
    va_list ap;
    va_start(ap, fmt);
    int n = vsnprintf(NULL, 0, fmt, ap);
    va_end(ap);
    if (n < 0) {
        b->failed = true;
        return;
    }
    char small[512];
    char *tmp = (size_t)n < sizeof small ? small : malloc((size_t)n + 1);
    if (!tmp) {
        b->failed = true;
        return;
    }
    va_start(ap, fmt);
    vsnprintf(tmp, (size_t)n + 1, fmt, ap);
    va_end(ap);
    sl_buf_append(b, tmp, (size_t)n);
    if (tmp != small)
        free(tmp);
}

void sl_buf_free(sl_buf *b)
{
    free(b->data);
    memset(b, 0, sizeof *b);
}

static pthread_once_t gsl_quiet_once = PTHREAD_ONCE_INIT;

static void gsl_quiet_setup(void)
{
    gsl_error_handler_t *previous = gsl_set_error_handler_off();
    if (previous != NULL)
        gsl_set_error_handler(previous);
}

void sl_gsl_quiet(void)
{
    pthread_once(&gsl_quiet_once, gsl_quiet_setup);
}

const char *sl_text_escape(const char *in, char *out, size_t size)
{
    size_t k = 0;
    if (size == 0)
        return out;
    for (const unsigned char *c = (const unsigned char *)(in ? in : ""); *c; c++) {
        if (*c < 0x20 || *c == 0x7f) {
            if (k + 5 > size - 1)
                break;
            snprintf(out + k, size - k, "\\x%02X", *c);
            k += 4;
        } else {
            if (k + 1 > size - 1)
                break;
            out[k++] = (char)*c;
        }
    }
    out[k] = '\0';
    return out;
}
