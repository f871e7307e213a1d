/*
 * Contour Data converted to points on every core (see contour_points.h).
 *
 * Each task converts one Contour Data element that DCMTK has already loaded
 * (the reader loads every value in its one pass over the file), touching
 * only that element, so tasks share nothing but the point budget. The
 * values are read and converted exactly as the ordered reader does
 * (ds_value.h's ds_convert over DCMTK's raw characters): the same doubles.
 * Anything unusual is left to the ordered reader, which reports it.
 */
#include "contour_points.h"

#include "ds_value.h"
#include "strayline/parallel.h"

#include <dcmtk/config/osconfig.h>
#include <dcmtk/dcmdata/dcelem.h>

#include <atomic>
#include <cstdlib>
#include <cstring>

namespace sl_dicom_internal {

namespace {

struct convert_job {
    std::vector<contour_values> *items;
    std::atomic<size_t> used; /* points allocated so far, against the limit */
    size_t max_points;
};

/* One element's values into points, or nothing (done stays false). The
 * values are not counted first (a pass over text no longer in the cache,
 * a fifth of the conversion): the points are allocated for the most values
 * the text can hold (a digit and a delimiter each) and the block shrunk to
 * the values found; pages never written are never touched. The values and
 * their count are those of ds_each in rt_read.cc, which counts the
 * delimiters: the padding it trims holds none. */
void convert_one(contour_values &cv, convert_job &job)
{
    char *chars = nullptr;
    Uint32 nchars = 0;
    if (cv.el->getString(chars, nchars).bad() || !chars || nchars == 0)
        return;
    const char *s = chars, *end = chars + nchars;
    while (end > s && (end[-1] == ' ' || end[-1] == '\0'))
        end--; /* the padding to an even length */
    size_t most = (static_cast<size_t>(end - s) + 1) / 2;
    if (most == 0 || most > 100000000UL)
        return; /* the ordered reader says what is wrong */
    size_t room = (most + 2) / 3;
    /* past the limit the ordered reader refuses the file before converting
     * more: do not hold more points than it would */
    if (job.used.fetch_add(room) + room > job.max_points) {
        job.used.fetch_sub(room);
        return;
    }
    sl_vec3 *pts = static_cast<sl_vec3 *>(malloc(room * sizeof(sl_vec3)));
    if (!pts) {
        job.used.fetch_sub(room);
        return;
    }
    /* each value found and converted in one pass (ds_scan) */
    const char *b = s;
    size_t vm = 0;
    for (;;) {
        const char *q = end;
        double d;
        if (vm == most || !ds_scan(b, end, &q, d)) {
            free(pts);
            job.used.fetch_sub(room);
            return;
        }
        sl_vec3 &p = pts[vm / 3];
        switch (vm % 3) {
        case 0: p.x = d; break;
        case 1: p.y = d; break;
        default: p.z = d; break;
        }
        vm++;
        if (q == end)
            break;
        b = q + 1;
    }
    size_t npoints = (vm + 2) / 3;
    sl_vec3 *fit = static_cast<sl_vec3 *>(realloc(pts, npoints * sizeof(sl_vec3)));
    if (fit)
        pts = fit;
    job.used.fetch_sub(room - npoints);
    cv.points = pts;
    cv.count = vm;
    cv.done = true;
}

extern "C" void convert_task(size_t t, void *ctx)
{
    convert_job *job = static_cast<convert_job *>(ctx);
    convert_one((*job->items)[t], *job);
}

} // namespace

contour_batch::~contour_batch()
{
    for (contour_values &cv : items_)
        free(cv.points);
}

void contour_batch::convert(int threads, size_t max_points)
{
    try {
        index_.reserve(items_.size());
        for (size_t i = 0; i < items_.size(); i++)
            index_.emplace(items_[i].el, i);
    } catch (...) {
        index_.clear();
        return; /* out of memory: the ordered reader converts everything */
    }
    convert_job job;
    job.items = &items_;
    job.used = 0;
    job.max_points = max_points;
    sl_parallel_for(items_.size(), threads, convert_task, &job);
}

bool contour_batch::take(const DcmElement *el, sl_vec3 **points, size_t *count)
{
    auto it = index_.find(el);
    if (it == index_.end())
        return false;
    contour_values &cv = items_[it->second];
    if (!cv.done)
        return false;
    *points = cv.points;
    *count = cv.count;
    cv.points = nullptr;
    cv.done = false; /* an element is taken once */
    return true;
}

} // namespace sl_dicom_internal
