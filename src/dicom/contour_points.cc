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

#include <algorithm>
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
 * checks are ds_each's in rt_read.cc, in the same order. */
void convert_one(contour_values &cv, convert_job &job)
{
    char *chars = nullptr;
    Uint32 nchars = 0;
    if (cv.el->getString(chars, nchars).bad() || !chars || nchars == 0)
        return;
    const char *s = chars, *end = chars + nchars;
    size_t vm = 1 + ds_delimiters(s, end);
    if (vm > 100000000UL)
        return;
    while (end > s && (end[-1] == ' ' || end[-1] == '\0'))
        end--; /* the padding to an even length */
    size_t npoints = (vm + 2) / 3;
    /* past the limit the ordered reader refuses the file before converting
     * more: do not hold more points than it would */
    if (job.used.fetch_add(npoints) + npoints > job.max_points)
        return;
    sl_vec3 *pts = static_cast<sl_vec3 *>(malloc(npoints * sizeof(sl_vec3)));
    if (!pts)
        return;
    /* each value found and converted in one pass (ds_scan); a value that
     * ends the list before vm values, or a delimiter after the last, leaves
     * the element to the ordered reader */
    const char *b = s;
    for (size_t i = 0; i < vm; i++) {
        const char *q = end;
        double d;
        if (!ds_scan(b, end, &q, d) || (i + 1 < vm) != (q < end)) {
            free(pts);
            return;
        }
        sl_vec3 &p = pts[i / 3];
        switch (i % 3) {
        case 0: p.x = d; break;
        case 1: p.y = d; break;
        default: p.z = d; break;
        }
        b = q < end ? q + 1 : end;
    }
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
