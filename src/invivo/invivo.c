/*
 * One in-vivo reading beside its estimate. The plan is screened again, as
 * `estimate` screens it, with the dosimeter added as a point or landmark
 * when it is not a ROI; the estimate at the dosimeter is the dose per
 * fraction at the position's point nearest the field edge times the
 * fractions measured, so the fraction count is applied once, here, and the
 * energy correction once, to the reading.
 *
 * The comparison is made on the log of the ratio measured / estimated: out
 * of field the errors are multiplicative (a model wrong by a factor, not by
 * a number of cGy), and the relative uncertainties of reading and estimate
 * add in quadrature on that scale.
 */
#include <math.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "strayline/dicom.h"
#include "strayline/invivo.h"
#include "strayline/screen.h"

void sl_invivo_result_free(sl_invivo_result *r)
{
    if (!r)
        return;
    free(r->plan_uid);
    free(r->structure_set_uid);
    free(r->patient_id);
    free(r->plan_label);
    free(r->machine);
    free(r->energy);
    free(r->applicator);
    sl_notes_free(&r->notes);
    memset(r, 0, sizeof *r);
}

/* The energies and applicators of the beams of one fraction group: "9" or
 * "6/9" (MeV), "A10" or "A10/A15". */
static sl_status beam_labels(const sl_estimate *e, size_t g, sl_invivo_result *out, sl_error *err)
{
    char en[128] = "", ap[256] = "";
    double first = NAN;
    bool mixed = false;
    for (size_t b = 0; b < e->nbeams; b++) {
        const sl_beam_dose *bd = &e->beams[b];
        if (isnan(bd->mu[g]))
            continue;
        char buf[32];
        snprintf(buf, sizeof buf, "%g", bd->energy_mev);
        if (isnan(first))
            first = bd->energy_mev;
        else if (fabs(first - bd->energy_mev) > 0.01)
            mixed = true;
        /* a label once only, in beam order */
        char key[40];
        snprintf(key, sizeof key, "/%s/", buf);
        char wrapped[140];
        snprintf(wrapped, sizeof wrapped, "/%s/", en);
        if (!strstr(wrapped, key))
            snprintf(en + strlen(en), sizeof en - strlen(en), "%s%s", en[0] ? "/" : "", buf);
        char akey[80];
        snprintf(akey, sizeof akey, "/%s/", bd->applicator ? bd->applicator : "?");
        char awrapped[270];
        snprintf(awrapped, sizeof awrapped, "/%s/", ap);
        if (!strstr(awrapped, akey))
            snprintf(ap + strlen(ap), sizeof ap - strlen(ap), "%s%s", ap[0] ? "/" : "",
                     bd->applicator ? bd->applicator : "?");
    }
    if (isnan(first))
        return sl_error_set(err, SL_EINPUT, "no electron beam of the plan is in that fraction "
                                            "group");
    out->energy_mev = mixed ? NAN : first;
    out->energy = strdup(en);
    out->applicator = strdup(ap);
    if (!out->energy || !out->applicator)
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    return SL_OK;
}

static void what_to_check(const sl_reading *rd, sl_invivo_result *r)
{
    char range[200] = "the position is within the model's measured range";
    if (r->model_flags & (SL_MF_EXTRAPOLATED | SL_MF_DEPTH_OUTSIDE))
        snprintf(range, sizeof range, "the position is outside the model's measured range (%s%s%s)",
                 r->model_flags & SL_MF_EXTRAPOLATED ? sl_model_flag_text(SL_MF_EXTRAPOLATED) : "",
                 (r->model_flags & SL_MF_EXTRAPOLATED) && (r->model_flags & SL_MF_DEPTH_OUTSIDE)
                     ? "; "
                     : "",
                 r->model_flags & SL_MF_DEPTH_OUTSIDE ? sl_model_flag_text(SL_MF_DEPTH_OUTSIDE)
                                                      : "");
    char corr[200];
    if (isnan(rd->energy_correction))
        snprintf(corr, sizeof corr,
                 "no energy correction was applied (out of field an OSL reading needs %.2f to "
                 "%.2f: uncorrected it reads 5 to 45 %% high)",
                 SL_INVIVO_OSL_CORR_LO, SL_INVIVO_OSL_CORR_HI);
    else
        snprintf(corr, sizeof corr, "the energy correction %.3f was applied once to the reading",
                 rd->energy_correction);
    snprintf(r->check, sizeof r->check,
             "measured/estimated %.3g is %.1f standard uncertainties from 1; check: the "
             "dosimeter's position (%.1f cm from the field edge, %.1f cm deep as placed); the "
             "energy correction (%s); the fraction count (%d of %d planned fractions); the "
             "model's range (%s)",
             exp(r->log_ratio), fabs(r->log_ratio) / r->u_log_ratio, r->distance_cm, r->depth_cm,
             corr, rd->fractions, r->planned_fractions, range);
}

sl_status sl_invivo_estimate(const sl_reading *rd, const sl_model *model, const sl_levels *levels,
                             const char *levels_path, sl_invivo_result *out, sl_error *err)
{
    memset(out, 0, sizeof *out);
    out->reading = rd;
    if (!rd->plan_path || !rd->ss_path)
        return sl_error_set(err, SL_EUSAGE,
                            "reading '%s': needs the plan and structure_set files to estimate "
                            "the dose at the dosimeter",
                            rd->id);
    sl_plan *plan = NULL;
    sl_structure_set *ss = NULL;
    sl_status st = sl_dicom_read_plan(rd->plan_path, &plan, err);
    if (st == SL_OK)
        st = sl_dicom_read_structures(rd->ss_path, &ss, err);
    if (st != SL_OK) {
        sl_plan_free(plan);
        return st;
    }
    if (rd->plan_uid && strcmp(rd->plan_uid, plan->sop_instance_uid) != 0)
        st = sl_error_set(err, SL_EINPUT,
                          "%s: SOPInstanceUID (0008,0018): '%s', but reading '%s' names plan UID "
                          "'%s'",
                          rd->plan_path, plan->sop_instance_uid, rd->id, rd->plan_uid);
    else if (!plan->patient_id || strcmp(plan->patient_id, rd->patient_id) != 0)
        st = sl_error_set(err, SL_EINPUT,
                          "%s: PatientID (0010,0020): '%s', but reading '%s' is of patient '%s'",
                          rd->plan_path, plan->patient_id ? plan->patient_id : "(none)", rd->id,
                          rd->patient_id);
    if (st != SL_OK) {
        sl_plan_free(plan);
        sl_structure_set_free(ss);
        return st;
    }
    bool ok = true;
    out->plan_uid = sl_strdup(plan->sop_instance_uid, &ok);
    out->structure_set_uid = ss->sop_instance_uid ? sl_strdup(ss->sop_instance_uid, &ok) : NULL;
    out->patient_id = sl_strdup(plan->patient_id, &ok);
    out->plan_label = plan->label ? sl_strdup(plan->label, &ok) : NULL;
    out->machine = sl_strdup(model->machine.name, &ok);
    if (!ok) {
        sl_plan_free(plan);
        sl_structure_set_free(ss);
        sl_invivo_result_free(out);
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    }
    /* the fraction group */
    size_t g = SIZE_MAX;
    if (rd->fraction_group) {
        for (size_t i = 0; i < plan->ngroups; i++)
            if (plan->groups[i].number == rd->fraction_group)
                g = i;
        if (g == SIZE_MAX)
            st = sl_error_set(err, SL_EINPUT,
                              "%s: FractionGroupSequence (300A,0070): no fraction group %d "
                              "(reading '%s')",
                              rd->plan_path, rd->fraction_group, rd->id);
    } else if (plan->ngroups == 1) {
        g = 0;
    } else {
        st = sl_error_set(err, SL_EUSAGE,
                          "reading '%s': the plan has %zu fraction groups: give fraction_group",
                          rd->id, plan->ngroups);
    }
    if (st != SL_OK) {
        sl_plan_free(plan);
        sl_structure_set_free(ss);
        sl_invivo_result_free(out);
        return st;
    }

    sl_screen_request req;
    sl_screen_request_init(&req);
    req.model = model;
    req.levels = levels;
    req.levels_path = levels_path;
    /* the comparison needs the organ's dose, not its judgement: a fetus in
     * the structure set without a gestational age is left not judged, as in
     * a batch, rather than refusing every reading of a pregnant patient */
    req.patient.age_unknown_unjudged = true;
    sl_screen_point pt = {rd->roi, rd->kind,
                          {rd->point_mm[0], rd->point_mm[1], rd->point_mm[2]}};
    sl_screen_landmark lm = {rd->roi, rd->kind, rd->distance_cm, rd->depth_cm};
    if (rd->pos == SL_POS_POINT) {
        req.points = &pt;
        req.npoints = 1;
    } else if (rd->pos == SL_POS_LANDMARK) {
        req.landmarks = &lm;
        req.nlandmarks = 1;
    } else if (!sl_structures_find(ss, rd->roi)) {
        st = sl_error_set(err, SL_EINPUT, "%s: StructureSetROISequence (3006,0020): no ROI '%s' "
                                          "(reading '%s')",
                          rd->ss_path, rd->roi, rd->id);
        sl_plan_free(plan);
        sl_structure_set_free(ss);
        sl_invivo_result_free(out);
        return st;
    }
    sl_screen *scr = NULL;
    st = sl_screen_run(plan, ss, &req, &scr, err);
    if (st != SL_OK) {
        sl_invivo_result_free(out);
        return st;
    }
    const sl_estimate *e = scr->est;
    const sl_organ_dose *od = NULL;
    for (size_t i = 0; i < e->norgans; i++)
        if (e->organs[i].roi && strcmp(e->organs[i].roi->name, rd->roi) == 0)
            od = &e->organs[i];
    const char *file = rd->plan_path;
    if (!od)
        st = sl_error_set(err, SL_EINPUT, "%s: reading '%s': '%s' was not estimated", file,
                          rd->id, rd->roi);
    else if (od->in_field)
        st = sl_error_set(err, SL_EINPUT,
                          "%s: reading '%s': '%s' lies in the field: the out-of-field model does "
                          "not apply there",
                          file, rd->id, rd->roi);
    else if (!od->estimated)
        st = sl_error_set(err, SL_EINPUT, "%s: reading '%s': '%s' is not estimated: %s", file,
                          rd->id, rd->roi, od->excluded_why ? od->excluded_why : "unknown");
    if (st == SL_OK)
        st = beam_labels(e, g, out, err);
    if (st == SL_OK) {
        int planned = e->fractions[g];
        out->planned_fractions = planned;
        if (planned > 0 && rd->fractions > planned)
            st = sl_error_set(err, SL_EINPUT,
                              "%s: reading '%s': fractions %d, but the fraction group plans %d",
                              file, rd->id, rd->fractions, planned);
    }
    if (st == SL_OK) {
        const sl_dose_stat *fx = &od->fx_nearest[g];
        out->distance_cm = od->min_distance_cm;
        /* the point compared: the sample nearest the field edge */
        out->depth_cm = isfinite(od->nearest_depth_cm) ? od->nearest_depth_cm : od->min_depth_cm;
        out->model_flags = od->nearest_flags;
        out->estimate_cgy = fx->cgy * rd->fractions;
        out->u_estimate_cgy = fx->u_cgy * rd->fractions;
        /* the budget at the point, scaled from the course to the fractions
         * measured; its transfer part is what propose and report use */
        double share = od->course_nearest.cgy > 0 ? out->estimate_cgy / od->course_nearest.cgy
                                                  : NAN;
        const sl_budget *cb = &od->course_nearest_budget;
        out->budget = (sl_budget){.fit_cgy = cb->fit_cgy * share,
                                  .measurement_cgy = cb->measurement_cgy * share,
                                  .interpolation_cgy = cb->interpolation_cgy * share,
                                  .extrapolation_cgy = cb->extrapolation_cgy * share,
                                  .standin_cgy = cb->standin_cgy * share,
                                  .transfer_cgy = cb->transfer_cgy * share,
                                  .setup_cgy = cb->setup_cgy * share,
                                  .uncommissioned_cgy = cb->uncommissioned_cgy * share,
                                  .combined_cgy = cb->combined_cgy * share};
        out->u_transfer_cgy = out->budget.transfer_cgy;
        double corr = isnan(rd->energy_correction) ? 1.0 : rd->energy_correction;
        out->measured_cgy = rd->reading_cgy * corr;
        double urel = sqrt(rd->u_detector * rd->u_detector + rd->u_added * rd->u_added);
        out->u_measured_cgy = urel * out->measured_cgy;
        if (!(out->estimate_cgy > 0) || !isfinite(out->estimate_cgy))
            st = sl_error_set(err, SL_EINPUT,
                              "%s: reading '%s': the estimate at '%s' is %g cGy: no ratio can be "
                              "formed",
                              file, rd->id, rd->roi, out->estimate_cgy);
        if (st == SL_OK) {
            double ue = out->u_estimate_cgy / out->estimate_cgy;
            out->log_ratio = log(out->measured_cgy / out->estimate_cgy);
            out->u_log_ratio = sqrt(urel * urel + ue * ue);
            out->flagged = fabs(out->log_ratio) > SL_INVIVO_K * out->u_log_ratio;
        }
    }
    if (st == SL_OK) {
        sl_notes *n = &out->notes;
        if (isnan(rd->energy_correction))
            sl_notes_add(n,
                         "reading '%s': no energy correction applied: out of field an OSL "
                         "reading needs %.2f to %.2f (Scarboro et al. 2012), uncorrected it reads "
                         "5 to 45 %% high; the ratio is taken as read",
                         rd->id, SL_INVIVO_OSL_CORR_LO, SL_INVIVO_OSL_CORR_HI);
        else if (strcmp(rd->detector, "OSL") == 0 &&
                 (rd->energy_correction < SL_INVIVO_OSL_CORR_LO - 1e-9 ||
                  rd->energy_correction > SL_INVIVO_OSL_CORR_HI + 1e-9))
            sl_notes_add(n,
                         "reading '%s': energy correction %.3f lies outside the %.2f to %.2f "
                         "published for OSL out of field (Scarboro et al. 2012): check it",
                         rd->id, rd->energy_correction, SL_INVIVO_OSL_CORR_LO,
                         SL_INVIVO_OSL_CORR_HI);
        unsigned pf = out->model_flags;
        if (pf & (SL_MF_EXTRAPOLATED | SL_MF_DEPTH_OUTSIDE))
            sl_notes_add(n,
                         "reading '%s': the position (%.1f cm from the field edge, %.1f cm deep) "
                         "is outside the model's measured range: %s%s%s; the comparison tests "
                         "the model's conservative hold, not a measured profile",
                         rd->id, out->distance_cm, out->depth_cm,
                         pf & SL_MF_EXTRAPOLATED ? sl_model_flag_text(SL_MF_EXTRAPOLATED) : "",
                         (pf & SL_MF_EXTRAPOLATED) && (pf & SL_MF_DEPTH_OUTSIDE) ? "; " : "",
                         pf & SL_MF_DEPTH_OUTSIDE ? sl_model_flag_text(SL_MF_DEPTH_OUTSIDE) : "");
        if (od->near_edge)
            sl_notes_add(n,
                         "reading '%s': %.1f cm from the field edge, nearer than %.1f cm: the "
                         "steep penumbra makes the comparison sensitive to the position",
                         rd->id, od->min_distance_cm, SL_NEAR_EDGE_CM);
        sl_notes_extend(n, &scr->as->notes);
        if (out->flagged)
            what_to_check(rd, out);
    }
    sl_screen_free(scr);
    if (st != SL_OK)
        sl_invivo_result_free(out);
    return st;
}
