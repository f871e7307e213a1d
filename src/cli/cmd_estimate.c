/*
 * `strayline estimate PLAN STRUCTURES --model MODEL.yaml`: the main job.
 * Reads the plan and structure set, places every electron field, applies the
 * machine's model at every organ sample, compares with the action levels and
 * writes the report; exit code 4 when an organ needs attention.
 */
#include <getopt.h>
#include <libgen.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "cli.h"
#include "strayline/dicom.h"
#include "strayline/dose.h"
#include "strayline/levels.h"
#include "strayline/locate.h"
#include "strayline/machine.h"
#include "strayline/model.h"
#include "strayline/util.h"

static const char help[] =
    "usage: strayline estimate PLAN STRUCTURES --model MODEL.yaml [OPTIONS]\n\n"
    "Screening estimate of every organ's out-of-field dose from the plan's\n"
    "TREATMENT electron beams, per fraction and per course (cGy), with its\n"
    "uncertainty (k = 1) and upper bound (k = 2), compared with action levels\n"
    "that carry their sources; shielding and measurement advice. Exit code 4\n"
    "when an organ may exceed or exceeds its level (or a device is above the low\n"
    "risk band).\n\n"
    "  -m, --model FILE            the machine's model file (required)\n"
    "  -l, --levels FILE           action-level table (default: action-levels.yaml\n"
    "                              beside the model file)\n"
    "  -f, --format FMT            standard output: text (default), json or csv\n"
    "  -o, --html FILE             also write the HTML report (self-contained)\n"
    "      --prescription-isodose PERCENT\n"
    "                              isodose the dose is prescribed to (e.g. 90), for\n"
    "                              the check against the plan's Beam Dose\n"
    "      --reference-dose CGY    dose per fraction at the central-axis maximum, for\n"
    "                              every beam, instead of MU x output\n"
    "      --setup-shift CM        setup uncertainty of distances (default 0.5)\n"
    "      --insert ID             model insert to use for the plan's cutouts\n"
    "      --points                interpolate the measured points, not the fits\n"
    "      --shield ROI=T          what-if: electron transmission T (0..1) over ROI\n"
    "      --organ ROI=KIND        give a ROI an organ kind (lens, fetus, ...)\n"
    "      --gestational-age WEEKS pregnant patient: gestational age\n"
    "      --fetus-point X,Y,Z     fetal landmark (patient coordinates, mm)\n"
    "      --device-point X,Y,Z    implanted cardiac device (patient coordinates, mm)\n"
    "      --pacing-dependent      the patient depends on the pacemaker\n"
    "      --age YEARS --sex M|F   for lifetime cancer risks (thyroid, breast)\n"
    "      --include-targets       estimate PTV / CTV / GTV ROIs too\n"
    "  -d, --depth CM              a depth for every organ (no body contour)\n"
    "      --allow-mismatch        go on when plan and structure set do not belong\n"
    "                              together (every output says so)\n"
    "  -j, --threads N             threads to use (default: every core)\n"
    "  -h, --help                  this help\n";

enum {
    OPT_ISODOSE = 256,
    OPT_REFDOSE,
    OPT_SHIFT,
    OPT_INSERT,
    OPT_POINTS,
    OPT_SHIELD,
    OPT_ORGAN,
    OPT_WEEKS,
    OPT_FETUS,
    OPT_DEVICE,
    OPT_PACING,
    OPT_AGE,
    OPT_SEX,
    OPT_TARGETS,
    OPT_MISMATCH
};

#define MAX_ITEMS 64

static bool parse_point(const char *s, sl_vec3 *p)
{
    char buf[128];
    snprintf(buf, sizeof buf, "%s", s);
    char *a = strtok(buf, ","), *b = strtok(NULL, ","), *c = strtok(NULL, ",");
    return a && b && c && !strtok(NULL, ",") && sl_parse_double(a, &p->x) &&
           sl_parse_double(b, &p->y) && sl_parse_double(c, &p->z);
}

/* "NAME=VALUE": split at the last '=' (ROI names may hold '='). */
static char *split_eq(char *s)
{
    char *eq = strrchr(s, '=');
    if (!eq || eq == s || !eq[1])
        return NULL;
    *eq = '\0';
    return eq + 1;
}

int sl_cmd_estimate(int argc, char **argv)
{
    static const struct option opts[] = {
        {"model", required_argument, NULL, 'm'},
        {"levels", required_argument, NULL, 'l'},
        {"format", required_argument, NULL, 'f'},
        {"html", required_argument, NULL, 'o'},
        {"prescription-isodose", required_argument, NULL, OPT_ISODOSE},
        {"reference-dose", required_argument, NULL, OPT_REFDOSE},
        {"setup-shift", required_argument, NULL, OPT_SHIFT},
        {"insert", required_argument, NULL, OPT_INSERT},
        {"points", no_argument, NULL, OPT_POINTS},
        {"shield", required_argument, NULL, OPT_SHIELD},
        {"organ", required_argument, NULL, OPT_ORGAN},
        {"gestational-age", required_argument, NULL, OPT_WEEKS},
        {"fetus-point", required_argument, NULL, OPT_FETUS},
        {"device-point", required_argument, NULL, OPT_DEVICE},
        {"pacing-dependent", no_argument, NULL, OPT_PACING},
        {"age", required_argument, NULL, OPT_AGE},
        {"sex", required_argument, NULL, OPT_SEX},
        {"include-targets", no_argument, NULL, OPT_TARGETS},
        {"depth", required_argument, NULL, 'd'},
        {"allow-mismatch", no_argument, NULL, OPT_MISMATCH},
        {"threads", required_argument, NULL, 'j'},
        {"help", no_argument, NULL, 'h'},
        {NULL, 0, NULL, 0},
    };
    const char *model_path = NULL, *levels_path = NULL, *html = NULL;
    sl_format fmt = SL_FORMAT_TEXT;
    sl_estimate_options eopt;
    sl_estimate_default_options(&eopt);
    sl_locate_options lopt;
    sl_locate_default_options(&lopt);
    sl_patient patient = {NAN, false, NAN, 0};
    bool allow_mismatch = false, fetus_point = false, device_point = false;
    sl_vec3 fetus_mm = {0, 0, 0}, device_mm = {0, 0, 0};
    sl_shield shields[MAX_ITEMS];
    sl_organ_map map[MAX_ITEMS + 2]; /* room for the fetus and device points */
    size_t nshields = 0, nmap = 0;
    double v;
    int c;
    optind = 1;
    while ((c = getopt_long(argc, argv, "m:l:f:o:d:j:h", opts, NULL)) != -1) {
        switch (c) {
        case 'm': model_path = optarg; break;
        case 'l': levels_path = optarg; break;
        case 'f':
            if (!sl_cli_format("estimate", optarg, &fmt))
                return SL_EXIT_USAGE;
            break;
        case 'o': html = optarg; break;
        case OPT_ISODOSE:
            if (!sl_parse_double(optarg, &v) || v <= 10 || v > 100)
                return sl_cli_usage("estimate", "--prescription-isodose needs a percentage "
                                                "between 10 and 100, not '%s'",
                                    optarg);
            eopt.prescription_isodose = v / 100;
            break;
        case OPT_REFDOSE:
            if (!sl_parse_double(optarg, &v) || v <= 0 || v > 5000)
                return sl_cli_usage("estimate", "--reference-dose needs a dose in cGy, not '%s'",
                                    optarg);
            eopt.reference_dose_cgy = v;
            break;
        case OPT_SHIFT:
            if (!sl_parse_double(optarg, &v) || v < 0 || v > 5)
                return sl_cli_usage("estimate", "--setup-shift needs 0 to 5 cm, not '%s'", optarg);
            eopt.setup_shift_cm = v;
            break;
        case OPT_INSERT: eopt.insert = optarg; break;
        case OPT_POINTS: eopt.mode = SL_EVAL_POINTS; break;
        case OPT_SHIELD: {
            char *t = split_eq(optarg);
            if (!t || !sl_parse_double(t, &v) || v < 0 || v > 1 || nshields == MAX_ITEMS)
                return sl_cli_usage("estimate", "--shield needs ROI=TRANSMISSION (0 to 1)");
            shields[nshields++] = (sl_shield){optarg, v};
            break;
        }
        case OPT_ORGAN: {
            char *k = split_eq(optarg);
            if (!k || nmap == MAX_ITEMS)
                return sl_cli_usage("estimate", "--organ needs ROI=KIND");
            map[nmap++] = (sl_organ_map){optarg, k};
            break;
        }
        case OPT_WEEKS:
            if (!sl_parse_double(optarg, &v) || v < 0 || v > 44)
                return sl_cli_usage("estimate", "--gestational-age needs 0 to 44 weeks, not '%s'",
                                    optarg);
            patient.gestational_weeks = v;
            break;
        case OPT_FETUS:
            if (!parse_point(optarg, &fetus_mm))
                return sl_cli_usage("estimate", "--fetus-point needs X,Y,Z in mm");
            fetus_point = true;
            break;
        case OPT_DEVICE:
            if (!parse_point(optarg, &device_mm))
                return sl_cli_usage("estimate", "--device-point needs X,Y,Z in mm");
            device_point = true;
            break;
        case OPT_PACING: patient.pacing_dependent = true; break;
        case OPT_AGE:
            if (!sl_parse_double(optarg, &v) || v < 0 || v > 120)
                return sl_cli_usage("estimate", "--age needs years, not '%s'", optarg);
            patient.age_years = v;
            break;
        case OPT_SEX:
            if (strcmp(optarg, "M") != 0 && strcmp(optarg, "F") != 0)
                return sl_cli_usage("estimate", "--sex needs M or F");
            patient.sex = optarg[0];
            break;
        case OPT_TARGETS: eopt.include_targets = true; break;
        case 'd':
            if (!sl_parse_double(optarg, &lopt.depth_cm) || lopt.depth_cm < 0)
                return sl_cli_usage("estimate", "--depth needs a depth in cm, not '%s'", optarg);
            break;
        case OPT_MISMATCH: allow_mismatch = true; break;
        case 'j':
            if (!sl_parse_int(optarg, &lopt.threads) || lopt.threads < 1 || lopt.threads > 64)
                return sl_cli_usage("estimate", "--threads needs a number from 1 to 64");
            eopt.threads = lopt.threads;
            break;
        case 'h': fputs(help, stdout); return SL_EXIT_OK;
        default: return sl_cli_usage("estimate", "bad option");
        }
    }
    if (argc - optind != 2)
        return sl_cli_usage("estimate", "needs two files: PLAN STRUCTURES");
    if (!model_path)
        return sl_cli_usage("estimate", "--model MODEL.yaml is required");
    if (fetus_point && isnan(patient.gestational_weeks))
        return sl_cli_usage("estimate", "--fetus-point needs --gestational-age WEEKS");
    if ((patient.sex && isnan(patient.age_years)) || (!patient.sex && !isnan(patient.age_years)))
        return sl_cli_usage("estimate", "--age and --sex go together");
    const char *plan_path = argv[optind], *ss_path = argv[optind + 1];
    char default_levels[4096];
    if (!levels_path) {
        char copy[4096];
        snprintf(copy, sizeof copy, "%s", model_path);
        snprintf(default_levels, sizeof default_levels, "%s/action-levels.yaml", dirname(copy));
        levels_path = default_levels;
    }
    eopt.shields = shields;
    eopt.nshields = nshields;

    sl_error err = {0};
    sl_model *model = NULL;
    sl_levels *levels = NULL;
    sl_plan *plan = NULL;
    sl_structure_set *ss = NULL;
    sl_location *loc = NULL;
    sl_estimate *est = NULL;
    sl_assessments *as = NULL;
    sl_applicator_size *cat = NULL;
    sl_outfile out = {0};
    int rc = SL_EXIT_OK;
    if (sl_model_load(model_path, &model, &err) != SL_OK ||
        sl_levels_load(levels_path, &levels, &err) != SL_OK ||
        sl_machine_catalogue(&model->machine, &cat, &lopt.ncatalogue, &err) != SL_OK ||
        sl_dicom_read_plan(plan_path, &plan, &err) != SL_OK ||
        sl_dicom_read_structures(ss_path, &ss, &err) != SL_OK ||
        sl_pair_check(plan, ss, allow_mismatch, &err) != SL_OK ||
        (fetus_point && sl_structures_add_point(ss, "Fetus (point given)", "MARKER", fetus_mm,
                                                &err) != SL_OK) ||
        (device_point && sl_structures_add_point(ss, "Cardiac device (point given)", "MARKER",
                                                 device_mm, &err) != SL_OK)) {
        rc = sl_cli_fail(&err);
        goto done;
    }
    if (device_point)
        map[nmap++] = (sl_organ_map){"Cardiac device (point given)", "cardiac_device"};
    if (fetus_point)
        map[nmap++] = (sl_organ_map){"Fetus (point given)", "fetus"};
    for (size_t i = 0; i < nshields; i++) {
        if (!sl_structures_find(ss, shields[i].roi)) {
            rc = sl_cli_usage("estimate", "--shield '%s': no ROI of that name", shields[i].roi);
            goto done;
        }
    }
    lopt.catalogue = cat;
    eopt.model = model;
    if (sl_locate(plan, ss, &lopt, &loc, &err) != SL_OK ||
        sl_estimate_doses(plan, ss, loc, &eopt, &est, &err) != SL_OK ||
        sl_assess(levels, est, &patient, map, nmap, &as, &err) != SL_OK) {
        rc = sl_cli_fail(&err);
        goto done;
    }
    sl_estimate_report rep = {plan, ss, loc, est, as, model, levels};
    if (html) {
        const char *inputs[] = {plan_path, ss_path, model_path, levels_path};
        if (sl_outfile_open(&out, html, inputs, 4, &err) != SL_OK ||
            sl_report_estimate_html(out.fp, &rep, &err) != SL_OK ||
            sl_outfile_commit(&out, &err) != SL_OK) {
            sl_outfile_abort(&out);
            rc = sl_cli_fail(&err);
            goto done;
        }
    }
    if (sl_report_estimate(stdout, fmt, &rep, &err) != SL_OK) {
        rc = sl_cli_fail(&err);
        goto done;
    }
    if (fflush(stdout) != 0) {
        fprintf(stderr, "strayline: output error: cannot write to standard output\n");
        rc = SL_EXIT_INTERNAL;
        goto done;
    }
    rc = as->any_flagged ? SL_EXIT_FLAGGED : SL_EXIT_OK;
done:
    sl_assessments_free(as);
    sl_estimate_free(est);
    sl_location_free(loc);
    sl_structure_set_free(ss);
    sl_plan_free(plan);
    free(cat);
    sl_levels_free(levels);
    sl_model_free(model);
    return rc;
}
