/*
 * strayline: the commissioning input, a measurement set.
 *
 * A measurement set (YAML, documented in models/README.md) names the machine,
 * the nominal SSD, the detector, the date and who measured, what the doses
 * are relative to, the applicator catalogue, the outputs, and for each
 * out-of-field profile its energy (MeV), applicator, insert, depth (cm),
 * direction, data file and uncertainty. Profile data are CSV files (libcsv)
 * with a header naming the columns and their units: distance from the field
 * edge (edge_distance_cm) or off-axis position through the field
 * (off_axis_cm), and dose in percent of the central-axis maximum
 * (dose_percent) or a raw reading (reading) with the central-axis reading
 * stated in the measurement set.
 *
 * Through-field profiles are turned into distances from the edge: the 50 %
 * point of each side (half the dose on the axis) is found by linear interpolation, the field width found
 * is compared with the nominal size projected to the measurement depth (a
 * note beyond 0.3 cm), and the points outside the field on both sides are
 * merged by their distance from their own edge.
 *
 * A profile may carry a beam tilt (the angle between the central axis and
 * the phantom's normal, signed by the side of the field the beam leans
 * toward in the profile's direction) and an SSD. A tilted through-field
 * profile is not merged: its positive side becomes a profile at the tilt as
 * given and its negative side one at the opposite tilt (the mirror rule: the
 * side a beam leans away from is the side a beam of opposite tilt leans
 * toward).
 */
#ifndef STRAYLINE_MEASURE_H
#define STRAYLINE_MEASURE_H

#include <stdbool.h>
#include <stddef.h>

#include "strayline/error.h"
#include "strayline/machine.h"
#include "strayline/util.h"

#ifdef __cplusplus
extern "C" {
#endif

#define SL_EDGE_WIDTH_WARN_CM 0.3
#define SL_PROFILE_MIN_POINTS 6
/* The plausible range of a profile's beam tilt (degrees, either sign) and
 * of its SSD about the nominal one (cm): a clinic measures up to a few tens
 * of degrees and a few tens of cm of stand-off (common practice); anything
 * beyond is a typing error. */
#define SL_TILT_MAX_DEG 60.0
#define SL_MEAS_SSD_SHORT_CM 5.0
#define SL_MEAS_SSD_LONG_CM 30.0

typedef struct sl_profile_data {
    double energy_mev;
    char *applicator;
    char *insert;          /* SL_INSERT_OPEN or an insert id */
    double depth_cm;
    char *direction;       /* "crossplane", "inplane" or "diagonal" */
    double tilt_deg;       /* beam tilt, signed: > 0 when the beam leans toward the side
                              this profile describes (0 when not given) */
    double ssd_cm;         /* SSD of the measurement (the nominal SSD when not given) */
    int side;              /* of a through-field profile: 0 both sides merged (tilt 0),
                              +1 the positive positions only, -1 the negative ones */
    char *file;            /* as the measurement set names it */
    char *path;            /* the file as read (relative to the set's folder resolved) */
    char sha256[SL_SHA256_HEX_LEN];
    double rel_uncertainty;      /* standard uncertainty, fraction of the dose */
    double floor_percent;        /* absolute floor, percent of the central-axis maximum */
    size_t n;
    double *distance_cm;   /* from the field edge, increasing */
    double *dose_percent;  /* of the central-axis maximum */
    double *sigma_percent; /* standard uncertainty of each point */
    bool from_positions;   /* the CSV gave off-axis positions */
    double width_found_cm; /* 50 % width found (NAN unless from_positions) */
    double axis_percent;   /* the dose on the axis at this depth (NAN unless from_positions) */
    double width_nominal_cm;
    size_t line;           /* of the profile's entry in the measurement set */
    size_t entry;          /* its number in the list (1-based; a mirrored twin shares it) */
} sl_profile_data;

typedef struct sl_measurement_set {
    char *source;
    char sha256[SL_SHA256_HEX_LEN];
    sl_machine machine;
    char *date, *measured_by, *detector, *reference;
    size_t nprofiles;
    sl_profile_data *profiles;
    sl_notes notes;
} sl_measurement_set;

/* Read a measurement set and every profile it names (paths relative to the
 * measurement set's folder). */
sl_status sl_measurements_load(const char *path, sl_measurement_set **out, sl_error *err);
/* The same from a buffer (`name` stands for the file; CSV paths are taken
 * relative to `dir`). */
sl_status sl_measurements_load_buffer(const char *data, size_t size, const char *name,
                                      const char *dir, sl_measurement_set **out, sl_error *err);
void sl_measurements_free(sl_measurement_set *m);

/* Read one profile CSV into a profile (its energy, applicator, insert,
 * depth and uncertainty already set): exposed for the tests and fuzzers.
 * `cax_reading` is NAN when the CSV gives dose_percent. */
sl_status sl_profile_read_csv(const char *path, double cax_reading, double nominal_width_cm,
                              sl_profile_data *p, sl_notes *notes, sl_error *err);
sl_status sl_profile_parse_csv(const char *data, size_t size, const char *name,
                               double cax_reading, double nominal_width_cm, sl_profile_data *p,
                               sl_notes *notes, sl_error *err);

/* The 50 % points of a through-field profile (positions increasing): where
 * the dose falls to half its value on the axis at that depth, by linear
 * interpolation on each side. Input error when a side has no crossing.
 * *axis (may be NULL) receives that value on the axis. */
sl_status sl_find_edges(const double *x, const double *d, size_t n, const char *what,
                        double *left, double *right, double *axis, sl_error *err);

/* The least dose (percent of the central-axis maximum) a profile can read
 * where the model is anchored, at a depth no deeper than the depth of
 * maximum: on the axis of a through-field profile (electron depth doses at
 * the surface are 70 % and more of their maximum, common practice), and
 * at the field edge of a profile by edge distance (half of that, less a
 * margin). Below them the profile is in another unit (a fraction) or
 * against another reference dose, and every organ would read low. An
 * insert's profiles given relative to the open field's maximum are held to
 * half of each (its cutout factor lowers them). */
#define SL_AXIS_MIN_PERCENT 60.0
/* A transfer uncertainty band below this relative value is warned about
 * when a measurement set is read (a strayline setting). */
#define SL_TRANSFER_WARN_BELOW 0.1
/* A through-field profile's 50 % width farther than both of these from the
 * nominal field projected to its depth, at a depth no deeper than the
 * maximum's and at normal incidence (tilt 0), is refused (a strayline setting; beyond SL_EDGE_WIDTH_WARN_CM
 * a note). */
#define SL_EDGE_WIDTH_REFUSE_CM 1.0
#define SL_EDGE_WIDTH_REFUSE_REL 0.15
/* The two sides of a through-field profile are averaged at each distance
 * unless they differ by more than this many standard deviations of a
 * difference of two points (sqrt 2 times a point's); then the hotter side
 * is kept (a strayline setting). */
#define SL_SIDES_APART_SIGMAS 3.0
#define SL_EDGE_MIN_PERCENT 10.0
/* A profile by edge distance is checked there when it starts this close
 * to the edge (cm). */
#define SL_EDGE_START_CM 0.25
/* Profiles of one energy, applicator and insert at depths no deeper than
 * the maximum, compared far from the field (at up to this distance, cm):
 * one whose median ratio to the others lies beyond this factor is refused
 * (a strayline setting; a fraction reads 100 times low, a reference dose
 * typed ten times high 10 times). */
#define SL_LEVELS_AT_CM 10.0
#define SL_LEVELS_APART 5.0
/* ... and a pair with a profile deeper than the maximum, compared nearer
 * than SL_LEVELS_AT_CM: beyond the electrons' range only photons remain, a
 * few times below the scattered electrons there (a strayline setting that
 * still finds a fraction given for a percent). */
#define SL_LEVELS_APART_DEEP 20.0
/* A profile whose first point lies farther than this from the edge (cm)
 * gets a note: the near-edge organs rest on the extrapolation. */
#define SL_EDGE_FAR_START_CM 1.0

void sl_profile_data_free(sl_profile_data *p);

#ifdef __cplusplus
}
#endif

#endif
