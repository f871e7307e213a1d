/*
 * `locate` output: per beam, the field and the central axis, then each
 * organ's volume, distances from the field edge and depths. The JSON key
 * names are read by later stages' tests and by outside checks: keep them.
 */
#include "strayline/report.h"
#include "strayline/version.h"

#include <math.h>
#include <stdio.h>
#include <string.h>

#include "jsonw.h"

static const char *orq(const char *s)
{
    return s ? s : "-";
}

static void text_num(FILE *fp, int width, int prec, double v)
{
    if (isfinite(v))
        fprintf(fp, " %*.*f", width, prec, v);
    else
        fprintf(fp, " %*s", width, "-");
}

static const char *organ_note(const sl_organ_place *p, size_t nsamples)
{
    if (nsamples == 0)
        return "no samples (no closed contour and no point)";
    if (p->placed == 0)
        return "not placed (behind the source)";
    if (sl_organ_in_field(p))
        return "IN FIELD: use the planning system's dose";
    if (p->outside_body_fraction >= SL_OUTSIDE_BODY_NOTE)
        return "partly outside the body contour";
    return "";
}

static void text_report(FILE *fp, const sl_plan *plan, const sl_structure_set *ss,
                        const sl_location *loc)
{
    fprintf(fp, "plan %s (%s), structure set %s (%s)\n", orq(plan->label), plan->source,
            orq(ss->label), ss->source);
    fprintf(fp, "depths: %s\n",
            loc->depth_from_body ? "in-body path length along the ray from the source "
                                   "(water-equivalent, unit density)"
                                 : "set by option");
    for (size_t b = 0; b < loc->nbeams; b++) {
        const sl_beam_place *bp = &loc->beams[b];
        const sl_beam *be = bp->beam;
        fprintf(fp, "\nbeam %d '%s': %.1f MeV, applicator %s, position %s, gantry %.1f deg, "
                    "collimator %.1f deg, couch %.1f deg\n",
                be->number, orq(be->name), be->energy_mev,
                be->applicator.present ? orq(be->applicator.id) : "-",
                sl_position_code(bp->position), be->gantry_deg, be->collimator_deg,
                be->couch_deg);
        fprintf(fp, "  field edge from the %s; area %.1f cm2 at the isocentric plane\n",
                sl_field_source_name(bp->field.source), bp->field.area_cm2);
        fprintf(fp, "  SSD plan");
        text_num(fp, 0, 1, bp->ssd_plan_cm);
        fprintf(fp, " cm, found on the body");
        text_num(fp, 0, 1, bp->ssd_found_cm);
        fprintf(fp, " cm; surface obliquity");
        text_num(fp, 0, 1, bp->obliquity_deg);
        fprintf(fp, " deg\n");
        if (bp->nboli) {
            fprintf(fp, "  bolus");
            for (size_t i = 0; i < bp->nboli; i++) {
                char bn[160];
                fprintf(fp, "%s '%s'", i ? "," : "",
                        sl_text_escape(bp->boli[i]->name, bn, sizeof bn));
            }
            fprintf(fp, " (%s): %s\n",
                    bp->boli_from == SL_BOLUS_REFERENCED ? "named by the beam"
                                                         : "typed BOLUS, not named by the beam",
                    !loc->depth_from_body ? "not counted, every depth is set by option"
                    : bp->boli_counted    ? "counted in depths and in the SSD found"
                                          : "left out of depths by option");
        }
        fprintf(fp, "  %-20s %-10s %9s %7s %9s %9s %9s %9s %9s %8s %9s  %s\n", "ROI", "type",
                "volume", "samples", "dist min", "dist mean", "dist max", "depth min",
                "depth max", "in field", "applic.", "note");
        fprintf(fp, "  %-20s %-10s %9s %7s %9s %9s %9s %9s %9s %8s %9s\n", "", "", "cm3", "",
                "cm", "cm", "cm", "cm", "cm", "%", "min cm");
        for (size_t o = 0; o < loc->norgans; o++) {
            const sl_roi *r = loc->rois[o];
            const sl_organ_samples *s = &loc->samples[o];
            const sl_organ_place *p = &bp->organs[o];
            char nm[160];
            fprintf(fp, "  %-20s %-10s", sl_text_escape(r->name, nm, sizeof nm), orq(r->type));
            if (s->is_point)
                fprintf(fp, " %9s", "point");
            else
                text_num(fp, 9, 3, s->volume_cc_total);
            fprintf(fp, " %7zu", s->n);
            text_num(fp, 9, 2, p->min_distance_cm);
            text_num(fp, 9, 2, p->mean_distance_cm);
            text_num(fp, 9, 2, p->max_distance_cm);
            text_num(fp, 9, 2, p->min_depth_cm);
            text_num(fp, 9, 2, p->max_depth_cm);
            text_num(fp, 8, 1, 100 * p->in_field_fraction);
            text_num(fp, 9, 2, p->min_app_distance_cm);
            fprintf(fp, "  %s\n", organ_note(p, s->n));
        }
        for (size_t i = 0; i < bp->notes.count; i++)
            fprintf(fp, "  warning: %s\n", bp->notes.items[i]);
    }
    for (size_t i = 0; i < loc->nskipped; i++)
        fprintf(fp, "\nbeam %d '%s' skipped: %s\n", loc->skipped[i].number,
                orq(loc->skipped[i].name), loc->skipped[i].reason);
    const sl_notes *lists[] = {&plan->notes, &ss->notes, &loc->notes};
    for (size_t k = 0; k < 3; k++)
        for (size_t i = 0; i < lists[k]->count; i++)
            fprintf(fp, "warning: %s\n", lists[k]->items[i]);
}

static json_object *vec3(jw *w, sl_vec3 v, const char *what)
{
    json_object *a = json_object_new_array();
    jw_append(w, a, jw_number(w, v.x, what));
    jw_append(w, a, jw_number(w, v.y, what));
    jw_append(w, a, jw_number(w, v.z, what));
    return a;
}

static json_object *json_report(jw *w, const sl_plan *plan, const sl_structure_set *ss,
                                const sl_location *loc)
{
    json_object *root = json_object_new_object();
    jw_str(w, root, "tool", "strayline");
    jw_str(w, root, "version", sl_version());
    jw_str(w, root, "plan_file", plan->source);
    jw_str(w, root, "plan_sop_instance_uid", plan->sop_instance_uid);
    jw_str(w, root, "structure_set_file", ss->source);
    jw_str(w, root, "structure_set_sop_instance_uid", ss->sop_instance_uid);
    jw_str(w, root, "depth_source", loc->depth_from_body ? "body contour" : "option");
    jw_num_opt(w, root, "depth_option_cm", loc->depth_from_body ? NAN : loc->depth_cm);
    json_object *beams = json_object_new_array();
    for (size_t b = 0; b < loc->nbeams; b++) {
        const sl_beam_place *bp = &loc->beams[b];
        const sl_beam *be = bp->beam;
        json_object *bo = json_object_new_object();
        jw_int(w, bo, "number", be->number);
        jw_str(w, bo, "name", be->name);
        jw_num(w, bo, "energy_mev", be->energy_mev);
        jw_str(w, bo, "applicator", be->applicator.present ? be->applicator.id : NULL);
        jw_str(w, bo, "patient_position", sl_position_code(bp->position));
        jw_num(w, bo, "gantry_deg", be->gantry_deg);
        jw_num(w, bo, "collimator_deg", be->collimator_deg);
        jw_num(w, bo, "couch_deg", be->couch_deg);
        jw_num(w, bo, "sad_cm", bp->frame.sad_cm);
        jw_num_opt(w, bo, "ssd_cm", isfinite(bp->ssd_found_cm) ? bp->ssd_found_cm : bp->ssd_plan_cm);
        jw_num_opt(w, bo, "ssd_plan_cm", bp->ssd_plan_cm);
        jw_num_opt(w, bo, "ssd_found_cm", bp->ssd_found_cm);
        jw_num_opt(w, bo, "obliquity_deg", bp->obliquity_deg);
        if (bp->entry_found)
            jw_put(w, bo, "entry_point_cm", vec3(w, bp->entry_cm, "entry_point_cm"));
        else
            jw_put(w, bo, "entry_point_cm", NULL);
        json_object *bol = json_object_new_object();
        json_object *bnames = json_object_new_array();
        for (size_t i = 0; i < bp->nboli; i++)
            jw_append(w, bnames, json_object_new_string(bp->boli[i]->name));
        jw_put(w, bol, "rois", bnames);
        jw_str(w, bol, "source",
               bp->boli_from == SL_BOLUS_REFERENCED ? "referenced by the beam"
               : bp->boli_from == SL_BOLUS_TYPED    ? "typed BOLUS, not referenced"
                                                    : NULL);
        jw_bool(w, bol, "counted", bp->nboli > 0 && bp->boli_counted && loc->depth_from_body);
        jw_put(w, bo, "bolus", bol);
        jw_str(w, bo, "field_source", sl_field_source_name(bp->field.source));
        jw_num(w, bo, "field_area_cm2", bp->field.area_cm2);
        json_object *organs = json_object_new_array();
        for (size_t o = 0; o < loc->norgans; o++) {
            const sl_roi *r = loc->rois[o];
            const sl_organ_samples *s = &loc->samples[o];
            const sl_organ_place *p = &bp->organs[o];
            json_object *oo = json_object_new_object();
            jw_str(w, oo, "roi", r->name);
            jw_int(w, oo, "roi_number", r->number);
            jw_str(w, oo, "type", r->type);
            jw_bool(w, oo, "point", s->is_point);
            jw_num(w, oo, "volume_cc", s->volume_cc_total);
            jw_int(w, oo, "samples", (long long)s->n);
            jw_int(w, oo, "outline_samples", (long long)s->n_outline);
            jw_num(w, oo, "pitch_cm", s->pitch_cm);
            jw_num_opt(w, oo, "min_distance_cm", p->min_distance_cm);
            jw_num_opt(w, oo, "mean_distance_cm", p->mean_distance_cm);
            jw_num_opt(w, oo, "max_distance_cm", p->max_distance_cm);
            jw_num_opt(w, oo, "min_applicator_distance_cm", p->min_app_distance_cm);
            jw_num_opt(w, oo, "min_depth_cm", p->min_depth_cm);
            jw_num_opt(w, oo, "max_depth_cm", p->max_depth_cm);
            jw_num_opt(w, oo, "in_field_fraction", p->in_field_fraction);
            jw_num_opt(w, oo, "outside_body_fraction", p->outside_body_fraction);
            jw_int(w, oo, "behind_source_samples", (long long)p->behind_source);
            jw_bool(w, oo, "in_field", sl_organ_in_field(p));
            if (p->placed > 0)
                jw_put(w, oo, "nearest_point_cm", vec3(w, s->points[p->nearest], "nearest_point_cm"));
            else
                jw_put(w, oo, "nearest_point_cm", NULL);
            /* the beam's tilt toward the nearest point, as the model takes it */
            double tilt = NAN;
            if (p->placed > 0) {
                sl_vec3 q = sl_frame_to_bld(&bp->frame, s->points[p->nearest]);
                tilt = sl_beam_tilt_toward(bp, q.x, q.y);
            }
            jw_num_opt(w, oo, "tilt_toward_nearest_deg", tilt);
            jw_append(w, organs, oo);
        }
        jw_put(w, bo, "organs", organs);
        jw_put(w, bo, "warnings", jw_notes(w, &bp->notes));
        jw_append(w, beams, bo);
    }
    jw_put(w, root, "beams", beams);
    json_object *skipped = json_object_new_array();
    for (size_t i = 0; i < loc->nskipped; i++) {
        json_object *so = json_object_new_object();
        jw_int(w, so, "number", loc->skipped[i].number);
        jw_str(w, so, "name", loc->skipped[i].name);
        jw_str(w, so, "reason", loc->skipped[i].reason);
        jw_append(w, skipped, so);
    }
    jw_put(w, root, "skipped_beams", skipped);
    sl_notes all = {0};
    sl_notes_extend(&all, &plan->notes);
    sl_notes_extend(&all, &ss->notes);
    sl_notes_extend(&all, &loc->notes);
    jw_put(w, root, "warnings", jw_notes(w, &all));
    sl_notes_free(&all);
    return root;
}

sl_status sl_report_locate(FILE *fp, sl_format fmt, const sl_plan *plan,
                           const sl_structure_set *ss, const sl_location *loc, sl_error *err)
{
    if (fmt == SL_FORMAT_CSV)
        return sl_error_set(err, SL_EUSAGE, "locate writes text or json, not csv");
    if (fmt == SL_FORMAT_TEXT) {
        text_report(fp, plan, ss, loc);
        return ferror(fp) ? sl_error_set(err, SL_EIO, "cannot write the output") : SL_OK;
    }
    jw w = {err, SL_OK};
    return jw_write(&w, json_report(&w, plan, ss, loc), fp);
}
