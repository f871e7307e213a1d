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

typedef struct sl_insert_spec {
    char *id;
    char *applicator;       /* the applicator it fits */
    char *shape;            /* "square", "rectangle", "circle" or "irregular" */
    double x_cm, y_cm;      /* opening at the nominal SSD */
} sl_insert_spec;

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
    size_t nfactors;
    sl_cutout_factor *factors;
} sl_output_spec;

typedef struct sl_machine {
    char *name;
    char *description;
    double nominal_ssd_cm;
    double sad_cm;
    bool invented;          /* demo data: every report says so */
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
/* Energies match within 0.01 MeV. */
const sl_output_spec *sl_machine_output(const sl_machine *m, double energy_mev,
                                        const char *applicator);

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
