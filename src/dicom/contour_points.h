/*
 * Contour Data converted to points ahead of the structure set's reading, on
 * every core (internal to src/dicom/: not a public header).
 *
 * Converting a dense structure set's Contour Data (millions of DS values) is
 * most of reading it once DCMTK has loaded the file, and each contour's
 * values are independent of every other's. The reader (rt_read.cc) lists
 * the Contour Data elements first, converts them here in parallel, then
 * walks the structure set in order as before and takes each contour's points
 * from here. A value that does not convert, or a contour past the point
 * limit, is left unconverted: the ordered walk converts it again itself and
 * reports it exactly as it always did, so messages and the first error named
 * do not depend on the threads.
 */
#ifndef STRAYLINE_DICOM_CONTOUR_POINTS_H
#define STRAYLINE_DICOM_CONTOUR_POINTS_H

#include "strayline/plan.h"

#include <cstddef>
#include <unordered_map>
#include <vector>

class DcmElement;

namespace sl_dicom_internal {

/* One Contour Data element (VR DS) and what became of it. */
struct contour_values {
    DcmElement *el;
    sl_vec3 *points;  /* malloc'd, count / 3 rounded up; NULL until converted */
    size_t count;     /* values */
    bool done;        /* every value converted: points and count hold them */
};

/* The converted elements, owning the points not yet taken. */
class contour_batch {
public:
    contour_batch() = default;
    contour_batch(const contour_batch &) = delete;
    contour_batch &operator=(const contour_batch &) = delete;
    ~contour_batch();

    void add(DcmElement *el) { items_.push_back({el, nullptr, 0, false}); }

    /* Convert every element listed, on `threads` threads, spending at most
     * max_points points in all (the reader's limit: beyond it the ordered
     * walk refuses the file on its declared counts). Never throws. */
    void convert(int threads, size_t max_points);

    /* The converted values of el handed over (the caller then owns the
     * points): true, or false when el was not converted here. */
    bool take(const DcmElement *el, sl_vec3 **points, size_t *count);

private:
    std::vector<contour_values> items_;
    std::unordered_map<const DcmElement *, size_t> index_;
};

} // namespace sl_dicom_internal

#endif
