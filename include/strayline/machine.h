/*
 * strayline: the description of a treatment machine that a measurement set
 * gives and a model file keeps: the machine, its electron applicators, the
 * custom inserts (cutouts) measured, and the output of each energy and
 * applicator. Plain data shared by the measurement reader, the fitter and
 * the model file; lengths in cm, energies in MeV, doses in cGy.
 */
#ifndef STRAYLINE_MACHINE_H
#define STRAYLINE_MACHINE_H

#include <stdbool.h>
#include <stddef.h>

#include "strayline/error.h"
#include "strayline/field.h"
#include "strayline/yamlio.h"

#ifdef __cplusplus
extern "C" {
#endif

/* Insert name of the open applicator (no custom cutout). */
#define SL_INSERT_OPEN "open"

typedef struct sl_applicator_spec {
    char *id;
    char *shape;            /* "square", "rectangle" or "circle" */
    double x_cm, y_cm;      /* nominal field at the nominal SSD (diameter for circles) */
    double source_to_end_cm;/* source to the applicator's end (NAN when not given) */
} sl_applicator_spec;

/* What an insert's profiles are percentages of. */
typedef enum sl_relative_to {
    SL_REL_UNSTATED,        /* an older file: taken as SL_REL_INSERT_CAX, with a note */
    SL_REL_INSERT_CAX,      /* the insert's own central-axis maximum: the cutout factor applies */
    SL_REL_OPEN_CAX         /* the open applicator's central-axis maximum: it does not */
} sl_relative_to;

typedef struct sl_insert_spec {
    char *id;
    char *applicator;       /* the applicator it fits */
    char *shape;            /* "square", "rectangle", "circle" or "irregular" */
    double x_cm, y_cm;      /* opening at the nominal SSD */
    sl_relative_to relative_to; /* key profiles_relative_to: insert_cax | open_cax */
} sl_insert_spec;

/* Nominal area (cm2) and equivalent square (cm) of an insert's opening:
 * x y (pi x y / 4 for a circle), and 4 x area / perimeter, the rule the
 * estimate applies to a plan's cutout (a circle's diameter, 2xy/(x+y) for a
 * rectangle). */
double sl_insert_area_cm2(const sl_insert_spec *s);
double sl_insert_equivalent_square_cm(const sl_insert_spec *s);

/* The transfer uncertainty: what a water-tank profile does not know about a
 * patient (body shape and scatter, beam direction, leakage asymmetry), as a
 * relative standard uncertainty by distance band from the field edge. A
 * model file states it under machine: transfer_uncertainty (a clinic puts
 * in its own in-vivo results); without it the built-in defaults apply. */
typedef struct sl_transfer_band {
    double below_cm;        /* upper edge of the band; INFINITY for the last */
    double relative;        /* relative standard uncertainty (k = 1) */
} sl_transfer_band;

typedef struct sl_transfer {
    size_t nbands;
    sl_transfer_band *bands;
    char *source;
    char *mark;
    bool is_default;        /* the file gave none: the built-in defaults */
} sl_transfer;

/* Relative transfer uncertainty at a distance (cm) from the field edge. */
double sl_transfer_relative(const sl_transfer *t, double distance_cm);
/* Fill *t with the built-in defaults (is_default set). */
sl_status sl_transfer_default(sl_transfer *t, sl_error *err);

typedef struct sl_cutout_factor {
    char *insert;
    double factor;          /* output of the insert relative to the open applicator */
} sl_cutout_factor;

typedef struct sl_output_spec {
    double energy_mev;
    char *applicator;
    double dose_per_mu_cgy; /* at the central-axis maximum, nominal SSD, open applicator */
    double dmax_cm;         /* depth of that maximum */
    double effective_ssd_cm;/* for the inverse-square correction at extended SSD */
    double ssd_cm;          /* the SSD this output was measured at (the nominal one unless
                               the file says otherwise) */
    size_t nfactors;
    sl_cutout_factor *factors;
} sl_output_spec;

typedef struct sl_machine {
    char *name;
    char *description;
    double nominal_ssd_cm;
    double sad_cm;
    bool invented;          /* demo data: every report says so */
    sl_transfer transfer;   /* machine: transfer_uncertainty (or the defaults) */
    size_t napplicators;
    sl_applicator_spec *applicators;
    size_t ninserts;
    sl_insert_spec *inserts;
    size_t noutputs;
    sl_output_spec *outputs;
} sl_machine;

void sl_machine_free(sl_machine *m);

const sl_applicator_spec *sl_machine_applicator(const sl_machine *m, const char *id);
const sl_insert_spec *sl_machine_insert(const sl_machine *m, const char *applicator,
                                        const char *id);
/* Energies match within 0.01 MeV; the output at the nominal SSD. */
const sl_output_spec *sl_machine_output(const sl_machine *m, double energy_mev,
                                        const char *applicator);

/* Outputs of one energy and applicator measured at SSDs within this of each
 * other (cm) are the same SSD. */
#define SL_SSD_MATCH_CM 0.5
/* The output measured at the SSD nearest to ssd_cm (NULL when none of this
 * energy and applicator lies within max_cm of it; INFINITY: any). */
const sl_output_spec *sl_machine_output_at(const sl_machine *m, double energy_mev,
                                           const char *applicator, double ssd_cm, double max_cm);

/* The applicator catalogue in the form the geometry stage takes; the
 * strings point into m. Caller frees the array. */
sl_status sl_machine_catalogue(const sl_machine *m, sl_applicator_size **out, size_t *n,
                               sl_error *err);

/* Read the machine part of a measurement set or model file: the mapping
 * under `machine`, and the lists `applicators`, `inserts`, `outputs`. */
sl_status sl_machine_read(sl_yaml *y, yaml_node_t *machine, yaml_node_t *applicators,
                          yaml_node_t *inserts, yaml_node_t *outputs, sl_machine *out,
                          sl_error *err);

/* Write the same keys (machine, applicators, inserts, outputs) into the
 * mapping being written. */
void sl_machine_write(sl_yaml_writer *w, const sl_machine *m);

#ifdef __cplusplus
}
#endif

#endif
