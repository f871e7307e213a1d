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
#include "strayline/parallel.h"
#include "strayline/rtdose.h"
#include "strayline/screen.h"
#include "strayline/util.h"
#include "strayline/version.h"

static const char help[] =
    "usage: strayline estimate PLAN STRUCTURES --model MODEL.yaml [OPTIONS]\n\n"
    "Screening estimate of every organ's out-of-field dose from the plan's\n"
    "TREATMENT electron beams, per fraction and per course (cGy), with its\n"
    "uncertainty (k = 1) and upper bound (k = 2), compared with action levels\n"
    "that carry their sources; shielding and measurement advice. Exit code 4\n"
    "when an organ may exceed or exceeds its level, a device is above the low\n"
    "risk band, an organ is left incomplete or a fetus or device asked for is\n"
    "not found.\n\n"
    "Treatment beams of other kinds (photons ...) are listed as not estimated\n"
    "and every organ with an action level is marked incomplete (exit code 4)\n"
    "unless --other-dose gives its dose from them.\n\n"
    "  -m, --model FILE            the machine's model file (required)\n"
    "  -l, --levels FILE           action-level table (default: action-levels.yaml\n"
    "                              beside the model file; models/action-levels-tg203.yaml\n"
    "                              judges cardiac devices by the AAPM TG-203 categories)\n"
    "  -f, --format FMT            the report's format: text (default), json or csv\n"
    "  -o, --output FILE           write that report to FILE, not standard output\n"
    "      --html FILE             also write the HTML report (self-contained; - for\n"
    "                              standard output)\n"
    "      --pdf FILE              also write the printable PDF report (- for standard\n"
    "                              output)\n"
    "      --paper a4|letter       the PDF's paper (default a4)\n"
    "      --pdf-dicom FILE        also write that PDF as a DICOM Encapsulated PDF in the\n"
    "                              plan's patient and study (a new series), for the\n"
    "                              archive or the record-and-verify system\n"
    ;
static const char help2[] =
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
    "      --other-dose ROI=CGY    add a course dose from elsewhere (other beams, an\n"
    "                              earlier course) to a ROI before it is judged\n"
    "      --gestational-age WEEKS pregnant patient: gestational age in weeks since\n"
    "                              the last menstrual period (the clinical convention);\n"
    "                              the ICRP 84 periods count weeks after conception,\n"
    "                              about 2 weeks less\n"
    "      --weeks-after-conception WEEKS\n"
    "                              the same, given as weeks after conception\n"
    "      --fetus-rise CM         what-if: also estimate each fetus CM closer to the\n"
    "                              head (it rises toward the diaphragm as pregnancy\n"
    "                              advances, during a course of several weeks)\n"
    "      --fetus-point X,Y,Z<mm|cm>  fetal position (patient coordinates), with its\n"
    "                              unit: 0,-250,-480mm or 0,-25,-48cm\n"
    "      --device-point X,Y,Z<mm|cm> implanted cardiac device (patient coordinates)\n"
    "      --point NAME=KIND@X,Y,Z<mm|cm>\n"
    "                              any organ or dosimeter position of a kind\n"
    "      --landmark NAME=KIND:DISTANCE_CM:DEPTH_CM\n"
    "                              an organ outside the scan, measured on the patient:\n"
    "                              distance from the nearest field edge along the body\n"
    "                              surface and depth below it (cm)\n"
    "      --pacing-dependent      the patient depends on the pacemaker\n"
    "      --not-pacing-dependent  the patient does not (not stated: a cardiac device\n"
    "                              is judged as for a pacing-dependent patient)\n"
    "      --age YEARS --sex M|F   for age-dependent statements and lifetime cancer\n"
    "                              risks (default: from the plan's Patient's Sex, Birth\n"
    "                              Date and RT Plan Date)\n"
    "      --include-targets       estimate PTV / CTV / GTV ROIs too\n"
    ;

/* the help in three pieces: ISO C limits one string to 4095 characters */
static const char help_more[] =
    "      --tps-dose RTDOSE.dcm   the planning system's dose of this plan (DICOM RT\n"
    "                              Dose, PLAN summation, or BEAM doses, each beam in\n"
    "                              one): used within the zone near the fields, the\n"
    "                              model beyond; the two compared (repeatable)\n"
    "      --tps-zone CM           the zone of the planning system's dose beyond the\n"
    "                              field edges (default 3)\n"
    "      --rtdose-out FILE.dcm   also write the estimate as a DICOM RT Dose over the\n"
    "                              body contour, in the plan's frame and study\n"
    "      --rtdose-spacing CM     its grid spacing (default 0.4)\n"
    "  -d, --depth CM              a depth for every organ (no body contour)\n"
    "      --no-bolus              what-if: leave the plan's bolus out of depths and\n"
    "                              of the SSD found on the body\n"
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
    OPT_NOT_PACING,
    OPT_AGE,
    OPT_SEX,
    OPT_TARGETS,
    OPT_MISMATCH,
    OPT_TPS,
    OPT_TPS_ZONE,
    OPT_RTDOSE_OUT,
    OPT_RTDOSE_STEP,
    OPT_CONCEPTION,
    OPT_OTHER,
    OPT_POINT,
    OPT_LANDMARK,
    OPT_RISE,
    OPT_HTML,
    OPT_PDF,
    OPT_PAPER,
    OPT_PDF_DICOM,
    OPT_NO_BOLUS
};

#define MAX_ITEMS 64

/* "X,Y,Z" with a unit, mm or cm, at the end: every report speaks cm and the
 * DICOM files mm, so a point without its unit is refused rather than guessed
 * (a point typed in cm and read as mm lands ten times too near). */
#define POINT_MAX_MM 5000.0

static bool parse_point(const char *s, sl_vec3 *p)
{
    char buf[128];
    size_t n = strlen(s);
    if (n < 3 || n >= sizeof buf)
        return false;
    double scale;
    if (strcmp(s + n - 2, "mm") == 0)
        scale = 1;
    else if (strcmp(s + n - 2, "cm") == 0)
        scale = 10;
    else
        return false;
    memcpy(buf, s, n - 2);
    buf[n - 2] = '\0';
    char *save = NULL;
    char *a = strtok_r(buf, ",", &save), *b = strtok_r(NULL, ",", &save),
         *c = strtok_r(NULL, ",", &save);
    if (!(a && b && c && !strtok_r(NULL, ",", &save) && sl_parse_double(a, &p->x) &&
          sl_parse_double(b, &p->y) && sl_parse_double(c, &p->z)))
        return false;
    p->x *= scale;
    p->y *= scale;
    p->z *= scale;
    /* a patient lies within metres of the DICOM origin: 0,0,1e20cm is a typo */
    return fabs(p->x) <= POINT_MAX_MM && fabs(p->y) <= POINT_MAX_MM && fabs(p->z) <= POINT_MAX_MM;
}

#define POINT_FORMS                                                                         \
    "X,Y,Z with its unit, in mm (0,-250,-480mm) or cm (0,-25,-48cm), each within 5 m of the " \
    "origin"

/* "NAME=VALUE": split at the last '=' (ROI names may hold '='). */
static char *split_eq(char *s)
{
    char *eq = strrchr(s, '=');
    if (!eq || eq == s || !eq[1])
        return NULL;
    *eq = '\0';
    return eq + 1;
}

/* Each output file is written atomically beside its target; "-" is
 * standard output. */
typedef sl_status (*writer_fn)(FILE *fp, const void *ctx, sl_error *err);

typedef struct pdf_bytes {
    const unsigned char *data;
    size_t len;
} pdf_bytes;

typedef struct report_args {
    const sl_estimate_report *rep;
    sl_format fmt;
} report_args;

static sl_status write_html(FILE *fp, const void *ctx, sl_error *err)
{
    return sl_report_estimate_html(fp, ctx, err);
}

static sl_status write_pdf(FILE *fp, const void *ctx, sl_error *err)
{
    const pdf_bytes *b = ctx;
    if (fwrite(b->data, 1, b->len, fp) != b->len)
        return sl_error_set(err, SL_EIO, "cannot write the PDF");
    return SL_OK;
}

static sl_status write_main(FILE *fp, const void *ctx, sl_error *err)
{
    const report_args *a = ctx;
    return sl_report_estimate(fp, a->fmt, a->rep, err);
}

/* The model and levels, and the plan and structure set, read at once on
 * two threads: a large structure set takes longer to read than anything
 * else before the estimate, and the model file is the next largest. */
typedef struct inputs_job {
    const char *model_path, *levels_path, *plan_path, *ss_path;
    sl_model *model;
    sl_levels *levels;
    sl_plan *plan;
    sl_structure_set *ss;
    sl_status st[2];
    sl_error err[2];
} inputs_job;

static void inputs_task(size_t task, void *ctx)
{
    inputs_job *j = ctx;
    if (task == 0) {
        j->st[0] = sl_model_load(j->model_path, &j->model, &j->err[0]);
        if (j->st[0] == SL_OK)
            j->st[0] = sl_levels_load(j->levels_path, &j->levels, &j->err[0]);
    } else {
        j->st[1] = sl_dicom_read_plan(j->plan_path, &j->plan, &j->err[1]);
        if (j->st[1] == SL_OK)
            j->st[1] = sl_dicom_read_structures(j->ss_path, &j->ss, &j->err[1]);
    }
}

static int write_report(const char *path, const char **inputs, const void *ctx, writer_fn fn,
                        sl_error *err)
{
    if (strcmp(path, "-") == 0) {
        if (fn(stdout, ctx, err) != SL_OK)
            return sl_cli_fail(err);
        if (fflush(stdout) != 0) {
            sl_cli_error("output error: cannot write to standard output");
            return SL_EXIT_INTERNAL;
        }
        return SL_EXIT_OK;
    }
    sl_outfile out = {0};
    if (sl_outfile_open(&out, path, inputs, 4, err) != SL_OK || fn(out.fp, ctx, err) != SL_OK ||
        sl_outfile_commit(&out, err) != SL_OK) {
        sl_outfile_abort(&out);
        return sl_cli_fail(err);
    }
    return SL_EXIT_OK;
}

int sl_cmd_estimate(int argc, char **argv)
{
    static const struct option opts[] = {
        {"model", required_argument, NULL, 'm'},
        {"levels", required_argument, NULL, 'l'},
        {"format", required_argument, NULL, 'f'},
        {"output", required_argument, NULL, 'o'},
        {"html", required_argument, NULL, OPT_HTML},
        {"pdf", required_argument, NULL, OPT_PDF},
        {"paper", required_argument, NULL, OPT_PAPER},
        {"pdf-dicom", required_argument, NULL, OPT_PDF_DICOM},
        {"prescription-isodose", required_argument, NULL, OPT_ISODOSE},
        {"reference-dose", required_argument, NULL, OPT_REFDOSE},
        {"setup-shift", required_argument, NULL, OPT_SHIFT},
        {"insert", required_argument, NULL, OPT_INSERT},
        {"points", no_argument, NULL, OPT_POINTS},
        {"shield", required_argument, NULL, OPT_SHIELD},
        {"organ", required_argument, NULL, OPT_ORGAN},
        {"gestational-age", required_argument, NULL, OPT_WEEKS},
        {"weeks-after-conception", required_argument, NULL, OPT_CONCEPTION},
        {"other-dose", required_argument, NULL, OPT_OTHER},
        {"point", required_argument, NULL, OPT_POINT},
        {"landmark", required_argument, NULL, OPT_LANDMARK},
        {"fetus-rise", required_argument, NULL, OPT_RISE},
        {"fetus-point", required_argument, NULL, OPT_FETUS},
        {"device-point", required_argument, NULL, OPT_DEVICE},
        {"pacing-dependent", no_argument, NULL, OPT_PACING},
        {"not-pacing-dependent", no_argument, NULL, OPT_NOT_PACING},
        {"age", required_argument, NULL, OPT_AGE},
        {"sex", required_argument, NULL, OPT_SEX},
        {"include-targets", no_argument, NULL, OPT_TARGETS},
        {"depth", required_argument, NULL, 'd'},
        {"no-bolus", no_argument, NULL, OPT_NO_BOLUS},
        {"allow-mismatch", no_argument, NULL, OPT_MISMATCH},
        {"tps-dose", required_argument, NULL, OPT_TPS},
        {"tps-zone", required_argument, NULL, OPT_TPS_ZONE},
        {"rtdose-out", required_argument, NULL, OPT_RTDOSE_OUT},
        {"rtdose-spacing", required_argument, NULL, OPT_RTDOSE_STEP},
        {"threads", required_argument, NULL, 'j'},
        {"help", no_argument, NULL, 'h'},
        {NULL, 0, NULL, 0},
    };
    const char *model_path = NULL, *levels_path = NULL, *html = NULL, *output = NULL,
               *pdf_path = NULL, *paper = "a4", *pdf_dicom = NULL;
    sl_format fmt = SL_FORMAT_TEXT;
    sl_estimate_options eopt;
    sl_estimate_default_options(&eopt);
    sl_locate_options lopt;
    sl_locate_default_options(&lopt);
    sl_patient patient;
    sl_patient_init(&patient);
    bool allow_mismatch = false;
    sl_shield shields[MAX_ITEMS];
    sl_organ_map map[4 * MAX_ITEMS]; /* --organ, points, fetus copies and landmarks, each at
                                        most MAX_ITEMS */
    sl_other_dose others[MAX_ITEMS];
    sl_screen_point pts[MAX_ITEMS];
    sl_screen_landmark lms[MAX_ITEMS];
    size_t nshields = 0, nmap = 0, nothers = 0, npts = 0, nlms = 0, ntps = 0;
    const char *tps_paths[MAX_ITEMS];
    const char *rtdose_out = NULL;
    double rtdose_step_cm = 0.4;
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
        case 'o': output = optarg; break;
        case OPT_HTML: html = optarg; break;
        case OPT_PDF: pdf_path = optarg; break;
        case OPT_PDF_DICOM:
            if (strcmp(optarg, "-") == 0)
                return sl_cli_usage("estimate", "--pdf-dicom needs a file name (a DICOM object "
                                                "does not go to standard output)");
            pdf_dicom = optarg;
            break;
        case OPT_PAPER:
            if (strcmp(optarg, "a4") != 0 && strcmp(optarg, "letter") != 0)
                return sl_cli_usage("estimate", "--paper needs a4 or letter, not '%s'", optarg);
            paper = optarg;
            break;
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
        case OPT_OTHER: {
            char *t = split_eq(optarg);
            if (!t || !sl_parse_double(t, &v) || v <= 0 || v > 1e5 || nothers == MAX_ITEMS)
                return sl_cli_usage("estimate", "--other-dose needs ROI=CGY (a course dose in "
                                                "cGy, more than 0)");
            others[nothers++] = (sl_other_dose){optarg, v};
            break;
        }
        case OPT_WEEKS:
            if (!sl_parse_double(optarg, &v) || v < 0 || v > 44)
                return sl_cli_usage("estimate", "--gestational-age needs 0 to 44 weeks since the "
                                                "last menstrual period, not '%s'",
                                    optarg);
            patient.gestational_weeks = v;
            break;
        case OPT_CONCEPTION:
            if (!sl_parse_double(optarg, &v) || v < 0 || v > 42)
                return sl_cli_usage("estimate", "--weeks-after-conception needs 0 to 42 weeks, "
                                                "not '%s'",
                                    optarg);
            patient.conception_weeks = v;
            patient.conception_given = true;
            break;
        case OPT_RISE:
            if (!sl_parse_double(optarg, &v) || v <= 0 || v > 30)
                return sl_cli_usage("estimate", "--fetus-rise needs more than 0 and at most 30 "
                                                "cm, not '%s'",
                                    optarg);
            patient.fetus_rise_cm = v;
            break;
        case OPT_FETUS:
        case OPT_DEVICE: {
            if (npts == MAX_ITEMS)
                return sl_cli_usage("estimate", "too many points");
            sl_screen_point *g = &pts[npts];
            if (!parse_point(optarg, &g->mm))
                return sl_cli_usage("estimate", "%s '%s': needs " POINT_FORMS,
                                    c == OPT_FETUS ? "--fetus-point" : "--device-point", optarg);
            g->name = c == OPT_FETUS ? "Fetus (point given)" : "Cardiac device (point given)";
            g->kind = c == OPT_FETUS ? "fetus" : "cardiac_device";
            for (size_t i = 0; i < npts; i++)
                if (strcmp(pts[i].name, g->name) == 0)
                    return sl_cli_usage("estimate", "%s given twice",
                                        c == OPT_FETUS ? "--fetus-point" : "--device-point");
            npts++;
            break;
        }
        case OPT_POINT: {
            /* NAME=KIND@X,Y,Z<unit> */
            char *at = strrchr(optarg, '@');
            char *eq = at ? memchr(optarg, '=', (size_t)(at - optarg)) : NULL;
            if (npts == MAX_ITEMS || !at || !eq || eq == optarg || eq + 1 == at)
                return sl_cli_usage("estimate", "--point '%s': needs NAME=KIND@" POINT_FORMS,
                                    optarg);
            sl_screen_point *g = &pts[npts];
            if (!parse_point(at + 1, &g->mm))
                return sl_cli_usage("estimate", "--point '%s': needs NAME=KIND@" POINT_FORMS,
                                    optarg);
            *at = '\0';
            *eq = '\0';
            g->name = optarg;
            g->kind = eq + 1;
            npts++;
            break;
        }
        case OPT_LANDMARK: {
            /* NAME=KIND:DISTANCE_CM:DEPTH_CM */
            char *eq = strchr(optarg, '=');
            char *c1 = eq ? strchr(eq + 1, ':') : NULL, *c2 = c1 ? strchr(c1 + 1, ':') : NULL;
            sl_screen_landmark *l = &lms[nlms];
            if (nlms == MAX_ITEMS || !eq || eq == optarg || !c1 || c1 == eq + 1 || !c2 ||
                strchr(c2 + 1, ':'))
                return sl_cli_usage("estimate", "--landmark '%s': needs "
                                                "NAME=KIND:DISTANCE_CM:DEPTH_CM",
                                    optarg);
            *eq = *c1 = *c2 = '\0';
            if (!sl_parse_double(c1 + 1, &l->distance_cm) || l->distance_cm < 0 ||
                l->distance_cm > 200 || !sl_parse_double(c2 + 1, &l->depth_cm) ||
                l->depth_cm < 0 || l->depth_cm > 50)
                return sl_cli_usage("estimate", "--landmark '%s': distance (0 to 200 cm) and "
                                                "depth (0 to 50 cm) must be numbers in cm",
                                    optarg);
            l->name = optarg;
            l->kind = eq + 1;
            nlms++;
            break;
        }
        case OPT_PACING:
            if (patient.pacing_stated && !patient.pacing_dependent)
                return sl_cli_usage("estimate", "--pacing-dependent and --not-pacing-dependent "
                                                "contradict each other");
            patient.pacing_dependent = patient.pacing_stated = true;
            patient.device_asked = true;
            break;
        case OPT_NOT_PACING:
            if (patient.pacing_dependent)
                return sl_cli_usage("estimate", "--pacing-dependent and --not-pacing-dependent "
                                                "contradict each other");
            patient.pacing_stated = true;
            break;
        case OPT_AGE:
            if (!sl_parse_double(optarg, &v) || v < 0 || v > 120)
                return sl_cli_usage("estimate", "--age needs years, not '%s'", optarg);
            patient.age_years = v;
            patient.age_from = "option";
            break;
        case OPT_SEX:
            if (strcmp(optarg, "M") != 0 && strcmp(optarg, "F") != 0)
                return sl_cli_usage("estimate", "--sex needs M or F");
            patient.sex = optarg[0];
            patient.sex_from = "option";
            break;
        case OPT_TARGETS: eopt.include_targets = true; break;
        case 'd':
            if (!sl_parse_double(optarg, &lopt.depth_cm) || lopt.depth_cm < 0)
                return sl_cli_usage("estimate", "--depth needs a depth in cm, not '%s'", optarg);
            break;
        case OPT_MISMATCH: allow_mismatch = true; break;
        case OPT_NO_BOLUS: lopt.no_bolus = true; break;
        case OPT_TPS:
            if (ntps == MAX_ITEMS)
                return sl_cli_usage("estimate", "too many --tps-dose files");
            tps_paths[ntps++] = optarg;
            break;
        case OPT_RTDOSE_OUT: rtdose_out = optarg; break;
        case OPT_RTDOSE_STEP:
            if (!sl_parse_double(optarg, &rtdose_step_cm) || rtdose_step_cm < 0.1 ||
                rtdose_step_cm > 2)
                return sl_cli_usage("estimate", "--rtdose-spacing needs 0.1 to 2 cm, not '%s'",
                                    optarg);
            break;
        case OPT_TPS_ZONE:
            if (!sl_parse_double(optarg, &v) || v <= 0 || v > 10)
                return sl_cli_usage("estimate", "--tps-zone needs more than 0 and at most 10 cm, "
                                                "not '%s'",
                                    optarg);
            eopt.tps_zone_cm = v;
            break;
        case 'j':
            if (!sl_parse_int(optarg, &lopt.threads) || lopt.threads < 1 || lopt.threads > 64)
                return sl_cli_usage("estimate", "--threads needs a number from 1 to 64");
            eopt.threads = lopt.threads;
            break;
        case 'h':
            fputs(help, stdout);
            fputs(help2, stdout);
            fputs(help_more, stdout);
            return SL_EXIT_OK;
        default: return sl_cli_bad_option(argv, opts, "m:l:f:o:d:j:h");
        }
    }
    if (argc - optind != 2)
        return sl_cli_usage("estimate", "needs two files: PLAN STRUCTURES");
    if (!model_path)
        return sl_cli_usage("estimate", "--model MODEL.yaml is required");
    if (!isnan(patient.gestational_weeks) && patient.conception_given)
        return sl_cli_usage("estimate", "give --gestational-age or --weeks-after-conception, "
                                        "not both");
    if (!isnan(patient.gestational_weeks))
        patient.conception_weeks = sl_weeks_after_conception(patient.gestational_weeks);
    if (patient.fetus_rise_cm > 0 && isnan(patient.conception_weeks))
        return sl_cli_usage("estimate", "--fetus-rise needs --gestational-age WEEKS");
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
    sl_screen *scr = NULL;
    sl_outfile out = {0};
    sl_rtdose *tps[MAX_ITEMS] = {0};
    int rc = SL_EXIT_OK;
    inputs_job in = {.model_path = model_path, .levels_path = levels_path,
                     .plan_path = plan_path, .ss_path = ss_path};
    sl_parallel_for(2, sl_parallel_threads(lopt.threads), inputs_task, &in);
    model = in.model;
    levels = in.levels;
    plan = in.plan;
    ss = in.ss;
    if (in.st[0] != SL_OK || in.st[1] != SL_OK) {
        /* the model's error first, as when they were read in turn */
        err = in.st[0] != SL_OK ? in.err[0] : in.err[1];
        sl_plan_free(plan);
        rc = sl_cli_fail(&err);
        goto done;
    }
    for (size_t i = 0; i < ntps; i++) {
        if (sl_rtdose_read(tps_paths[i], &tps[i], &err) != SL_OK) {
            sl_plan_free(plan);
            rc = sl_cli_fail(&err);
            goto done;
        }
    }
    eopt.tps = (const sl_rtdose *const *)tps;
    eopt.ntps = ntps;
    sl_screen_request req;
    sl_screen_request_init(&req);
    req.model = model;
    req.levels = levels;
    req.levels_path = levels_path;
    req.estimate = eopt;
    req.locate = lopt;
    req.patient = patient;
    req.allow_mismatch = allow_mismatch;
    req.map = map;
    req.nmap = nmap;
    req.others = others;
    req.nothers = nothers;
    req.points = pts;
    req.npoints = npts;
    req.landmarks = lms;
    req.nlandmarks = nlms;
    sl_status st = sl_screen_run(plan, ss, &req, &scr, &err);
    plan = NULL;
    ss = NULL;
    if (st != SL_OK) {
        rc = st == SL_EUSAGE ? sl_cli_usage("estimate", "%s", err.msg) : sl_cli_fail(&err);
        goto done;
    }
    sl_estimate_report rep = {scr->plan, scr->ss,       scr->loc,      scr->est,
                              scr->as,   model,         levels,        scr->whatifs,
                              scr->nwhatifs};
    if (rtdose_out) {
        const char *inputs[] = {plan_path, ss_path, model_path, levels_path};
        sl_dose_grid *grid = NULL;
        char comment[1024];
        snprintf(comment, sizeof comment,
                 "SCREENING ESTIMATE by strayline %s of the out-of-field dose of the plan's "
                 "electron beams over the course (Gy), from the model %s; %s. Confirm high "
                 "values by measurement; local protocols and a qualified medical physicist "
                 "decide. Each value is rounded up to a multiple of Dose Grid Scaling.",
                 sl_version(), model_path,
                 scr->est->tps_used ? "within the zone of the field edges the planning "
                                      "system's own dose"
                                    : "voxels inside a field are 0: not estimated");
        if (sl_estimate_grid(scr->est, rtdose_step_cm, &grid, &err) != SL_OK ||
            sl_outfile_open(&out, rtdose_out, inputs, 4, &err) != SL_OK ||
            sl_rtdose_write(out.tmp, plan_path, grid, comment, &err) != SL_OK ||
            sl_outfile_commit(&out, &err) != SL_OK) {
            sl_outfile_abort(&out);
            sl_dose_grid_free(grid);
            rc = sl_cli_fail(&err);
            goto done;
        }
        sl_dose_grid_free(grid);
        memset(&out, 0, sizeof out);
    }
    const char *inputs[] = {plan_path, ss_path, model_path, levels_path};
    int to_stdout = (!output || strcmp(output, "-") == 0) + (html && strcmp(html, "-") == 0) +
                    (pdf_path && strcmp(pdf_path, "-") == 0);
    if (to_stdout > 1) {
        rc = sl_cli_usage("estimate", "only one report can go to standard output: give -o FILE "
                                      "for the %s report",
                          fmt == SL_FORMAT_JSON ? "JSON" : fmt == SL_FORMAT_CSV ? "CSV" : "text");
        goto done;
    }
    if (html && (rc = write_report(html, inputs, &rep, write_html, &err)) != SL_EXIT_OK)
        goto done;
    if (pdf_path || pdf_dicom) {
        /* one PDF: the file and the DICOM object carry the same bytes */
        unsigned char *pdf = NULL;
        size_t npdf = 0;
        if (sl_report_estimate_pdf(&rep, paper, &pdf, &npdf, &err) != SL_OK) {
            rc = sl_cli_fail(&err);
            goto done;
        }
        pdf_bytes pb = {pdf, npdf};
        if (pdf_path)
            rc = write_report(pdf_path, inputs, &pb, write_pdf, &err);
        if (rc == SL_EXIT_OK && pdf_dicom) {
            bool over = false;
            for (size_t i = 0; i < 4; i++)
                over |= sl_same_file(pdf_dicom, inputs[i]);
            if (over)
                rc = sl_cli_usage("estimate", "--pdf-dicom %s: refusing to write over an input "
                                              "file",
                                  pdf_dicom);
            else if (sl_dicom_write_pdf(pdf_dicom, plan_path, pdf, npdf,
                                        "Out-of-field dose screening estimate", &err) != SL_OK)
                rc = sl_cli_fail(&err);
        }
        free(pdf);
        if (rc != SL_EXIT_OK)
            goto done;
    }
    report_args ra = {&rep, fmt};
    if (output && strcmp(output, "-") != 0) {
        if ((rc = write_report(output, inputs, &ra, write_main, &err)) != SL_EXIT_OK)
            goto done;
    } else {
        if (sl_report_estimate(stdout, fmt, &rep, &err) != SL_OK) {
            rc = sl_cli_fail(&err);
            goto done;
        }
        if (fflush(stdout) != 0) {
            sl_cli_error("output error: cannot write to standard output");
            rc = SL_EXIT_INTERNAL;
            goto done;
        }
    }
    rc = scr->as->any_flagged ? SL_EXIT_FLAGGED : SL_EXIT_OK;
done:
    for (size_t i = 0; i < ntps; i++)
        sl_rtdose_free(tps[i]);
    sl_screen_free(scr);
    sl_structure_set_free(ss);
    sl_levels_free(levels);
    sl_model_free(model);
    return rc;
}
