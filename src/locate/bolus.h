/*
 * Private to the placement stage: which bolus each beam's rays pass through
 * (bolus.c). Not a public header: the location's fields and
 * sl_location_depth (locate.h) are what other stages see.
 */
#ifndef STRAYLINE_LOCATE_BOLUS_H
#define STRAYLINE_LOCATE_BOLUS_H

#include "strayline/locate.h"

/* Choose beam bp->beam's bolus, build the solids it needs (kept in the
 * location) and set bp's bolus fields and depth solids; the body
 * (loc->body) must be built. Anything odd (a referenced ROI the structure
 * set lacks, one with no closed contour, a ROI typed BOLUS that the beam
 * does not name) goes into bp->notes. Errors: out of memory, a bolus whose
 * contours enclose no area. */
sl_status sl_locate_bolus(sl_location *loc, const sl_structure_set *ss,
                          const sl_locate_options *opt, sl_beam_place *bp, sl_error *err);

/* Free what sl_locate_bolus kept in the location and in its beams. */
void sl_locate_bolus_free(sl_location *loc);

#endif
