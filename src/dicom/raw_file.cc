/*
 * The guards before DCMTK (raw_file.h): shared by the full reader and the
 * header reader, so that a hostile file meets the same limits in `scan`,
 * `listen` and `estimate`.
 */
#include "raw_file.h"

#include "strayline/dicom.h"

#include <cerrno>
#include <cstdlib>
#include <cstring>
#include <fcntl.h>
#include <pthread.h>
#include <sys/stat.h>
#include <unistd.h>

namespace sl_dicom_internal {

/* Anything else is refused before DCMTK sees it: read as a data set, text
 * would give element lengths of gigabytes. */
bool looks_like_dicom(const unsigned char *p, size_t n)
{
    if (n >= 132 && memcmp(p + 128, "DICM", 4) == 0)
        return true;
    if (n < 8)
        return false;
    unsigned le = p[0] | (unsigned)p[1] << 8, be = (unsigned)p[0] << 8 | p[1];
    return le == 0x0002 || le == 0x0008 || be == 0x0002 || be == 0x0008;
}

const char *const NOT_DICOM =
    "not a DICOM file (no DICM marker after the preamble, and it does not begin with a DICOM "
    "element)";

/* Their count bounds the depth DCMTK's recursive reader can reach. Each form
 * holds exactly one 0xFE byte (first in little endian, second in big
 * endian), so memchr jumps from one 0xFE to the next: Contour Data is text
 * and holds none, where a byte-by-byte test cost a pass over it. */
size_t count_item_tags(const unsigned char *p, size_t n)
{
    size_t k = 0;
    const unsigned char *end = p + n;
    for (const unsigned char *q = p; q < end;) {
        q = static_cast<const unsigned char *>(memchr(q, 0xFE, static_cast<size_t>(end - q)));
        if (!q)
            break;
        size_t i = static_cast<size_t>(q - p);
        if (i + 4 <= n && q[1] == 0xFF && q[2] == 0x00 && q[3] == 0xE0)
            k++;
        else if (i >= 1 && i + 3 <= n && q[-1] == 0xFF && q[1] == 0xE0 && q[2] == 0x00)
            k++;
        q++;
    }
    return k;
}

/* Read, not mapped: a file shortened while it is read (an export still
 * being written into the folder a scan walks) would raise SIGBUS at a
 * mapped page past its new end and end the whole batch (found by an
 * independent review); read() returns what is there, and DCMTK, reading
 * the file again, refuses a truncated one by name. */
sl_status raw_read_file(const char *path, raw_bytes *m, sl_error *err)
{
    *m = raw_bytes{};
    /* O_NONBLOCK: a FIFO in the folder opens at once (and is refused as
     * not a regular file) instead of waiting for a writer */
    int fd = open(path, O_RDONLY | O_CLOEXEC | O_NONBLOCK);
    if (fd < 0)
        return sl_error_set(err, SL_EINPUT, "%s: cannot open: %s", path, strerror(errno));
    struct stat sb;
    sl_status st = SL_OK;
    if (fstat(fd, &sb) != 0)
        st = sl_error_set(err, SL_EINPUT, "%s: cannot open: %s", path, strerror(errno));
    else if (!S_ISREG(sb.st_mode))
        st = sl_error_set(err, SL_EINPUT, "%s: not a regular file", path);
    else if (sb.st_size == 0)
        st = sl_error_set(err, SL_EINPUT, "%s: empty file, not DICOM", path);
    else if (static_cast<unsigned long long>(sb.st_size) > SL_DICOM_MAX_FILE_BYTES)
        st = sl_error_set(err, SL_EINPUT, "%s: %lld bytes, larger than strayline accepts", path,
                          static_cast<long long>(sb.st_size));
    size_t want = st == SL_OK ? static_cast<size_t>(sb.st_size) : 0, got = 0;
    unsigned char *buf = st == SL_OK ? static_cast<unsigned char *>(malloc(want)) : nullptr;
    if (st == SL_OK && !buf)
        st = sl_error_set(err, SL_ENOMEM, "%s: out of memory for %zu bytes", path, want);
    while (st == SL_OK && got < want) {
        ssize_t k = read(fd, buf + got, want - got);
        if (k < 0 && errno == EINTR)
            continue;
        if (k < 0)
            st = sl_error_set(err, SL_EINPUT, "%s: cannot read: %s", path, strerror(errno));
        else if (k == 0)
            break; /* shortened meanwhile: what is there */
        else
            got += static_cast<size_t>(k);
    }
    close(fd);
    if (st == SL_OK && got == 0)
        st = sl_error_set(err, SL_EINPUT, "%s: empty file, not DICOM", path);
    if (st != SL_OK) {
        free(buf);
        return st;
    }
    m->data = buf;
    m->size = got;
    return SL_OK;
}

void raw_release(raw_bytes *m)
{
    free(const_cast<unsigned char *>(m->data));
    *m = raw_bytes{};
}

size_t reader_stack(size_t items)
{
    return (static_cast<size_t>(16) << 20) + items * static_cast<size_t>(SL_DICOM_STACK_PER_LEVEL);
}

int run_on_stack(size_t stack, void *(*fn)(void *), void *arg)
{
    pthread_attr_t attr;
    pthread_t th;
    int rc = pthread_attr_init(&attr);
    if (rc != 0)
        return rc;
    rc = pthread_attr_setstacksize(&attr, stack);
    if (rc == 0)
        rc = pthread_create(&th, &attr, fn, arg);
    pthread_attr_destroy(&attr);
    if (rc == 0)
        pthread_join(th, nullptr);
    return rc;
}

} // namespace sl_dicom_internal
