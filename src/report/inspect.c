/*
 * `inspect` output: what strayline read from each DICOM file, in text or
 * JSON, with lengths converted once from the file's millimetres to cm.
 *
 * The JSON form is what the reference tests compare, value by value, with an
 * independent reader (pydicom), so every value read is written, including
 * the beams that will be skipped and why.
 */
#include "strayline/report.h"
#include "strayline/version.h"

#include <math.h>
#include <string.h>

#include "jsonw.h"

#define MM_TO_CM 0.1

bool sl_format_parse(const char *name, sl_format *out)
{
    static const struct {
        const char *name;
        sl_format fmt;
    } names[] = {{"text", SL_FORMAT_TEXT}, {"json", SL_FORMAT_JSON}, {"csv", SL_FORMAT_CSV}};
    for (size_t i = 0; i < sizeof names / sizeof *names; i++) {
        if (strcmp(name, names[i].name) == 0) {
            *out = names[i].fmt;
            return true;
        }
    }
    return false;
}

static double cm(double mm)
{
    return mm * MM_TO_CM;
}

static const char *orq(const char *s)
{
    return s ? s : "-";
}

static int beam_fractions(const sl_plan *p, int beam, double *mu)
{
    *mu = NAN;
    for (size_t g = 0; g < p->ngroups; g++) {
        for (size_t r = 0; r < p->groups[g].nrefs; r++) {
            if (p->groups[g].refs[r].beam_number == beam) {
                *mu = p->groups[g].refs[r].meterset_mu;
                return p->groups[g].fractions;
            }
        }
    }
    return -1;
}

/* ------------------------------------------------------------- text -- */

static void text_plan(FILE *fp, const sl_plan *p)
{
    fprintf(fp, "%s: RT Plan '%s'%s%s%s\n", p->source, orq(p->label), p->name ? " (" : "",
            p->name ? p->name : "", p->name ? ")" : "");
    fprintf(fp, "  SOP Instance UID       %s\n", p->sop_instance_uid);
    fprintf(fp, "  patient                %s, ID %s\n", orq(p->patient_name), orq(p->patient_id));
    fprintf(fp, "  frame of reference     %s\n", orq(p->frame_uid));
    fprintf(fp, "  structure set          %s\n", orq(p->structure_set_uid));
    for (size_t i = 0; i < p->nsetups; i++)
        fprintf(fp, "  patient setup %d        %s\n", p->setups[i].number,
                sl_position_code(p->setups[i].position));
    for (size_t g = 0; g < p->ngroups; g++) {
        const sl_fraction_group *fg = &p->groups[g];
        fprintf(fp, "  fraction group %d       ", fg->number);
        if (fg->fractions > 0)
            fprintf(fp, "%d fractions", fg->fractions);
        else
            fprintf(fp, "fractions not given");
        for (size_t r = 0; r < fg->nrefs; r++) {
            fprintf(fp, "%s beam %d", r ? "," : ":", fg->refs[r].beam_number);
            if (isfinite(fg->refs[r].meterset_mu))
                fprintf(fp, " %.1f MU", fg->refs[r].meterset_mu);
            if (isfinite(fg->refs[r].beam_dose_gy))
                fprintf(fp, " %.3f Gy", fg->refs[r].beam_dose_gy);
        }
        fputc('\n', fp);
    }
    for (size_t d = 0; d < p->ndose_refs; d++) {
        if (isfinite(p->dose_refs[d].target_prescription_gy))
            fprintf(fp, "  prescription           %.3f Gy (dose reference %d, %s)\n",
                    p->dose_refs[d].target_prescription_gy, p->dose_refs[d].number,
                    orq(p->dose_refs[d].type));
    }
    for (size_t i = 0; i < p->nbeams; i++) {
        const sl_beam *b = &p->beams[i];
        const char *skip = sl_beam_skip_reason(b);
        fprintf(fp, "  beam %d '%s': %s %s %s, machine %s\n", b->number, orq(b->name),
                orq(b->radiation_type), orq(b->delivery_type), orq(b->beam_type),
                orq(b->machine));
        if (skip) {
            fprintf(fp, "      skipped: %s\n", skip);
            continue;
        }
        fprintf(fp, "      energy %.1f MeV, SAD %.1f cm%s", b->energy_mev, cm(b->sad_mm),
                b->sad_defaulted ? " (assumed)" : "");
        if (isfinite(b->ssd_mm))
            fprintf(fp, ", SSD %.1f cm\n", cm(b->ssd_mm));
        else
            fprintf(fp, ", SSD not given\n");
        fprintf(fp, "      gantry %.1f deg, collimator %.1f deg, couch %.1f deg", b->gantry_deg,
                b->collimator_deg, b->couch_deg);
        if (b->eccentric_deg != 0.0)
            fprintf(fp, ", table top eccentric %.1f deg", b->eccentric_deg);
        fputc('\n', fp);
        fprintf(fp, "      isocentre (%.2f, %.2f, %.2f) cm (patient x, y, z)\n",
                cm(b->isocenter_mm.x), cm(b->isocenter_mm.y), cm(b->isocenter_mm.z));
        if (b->applicator.present) {
            fprintf(fp, "      applicator %s (%s)", b->applicator.id, orq(b->applicator.type));
            if (isfinite(b->applicator.opening_x_mm) && isfinite(b->applicator.opening_y_mm))
                fprintf(fp, ", opening %.1f x %.1f cm", cm(b->applicator.opening_x_mm),
                        cm(b->applicator.opening_y_mm));
            else if (isfinite(b->applicator.opening_mm))
                fprintf(fp, ", opening %.1f cm", cm(b->applicator.opening_mm));
            fputc('\n', fp);
        } else {
            fprintf(fp, "      no applicator in the plan\n");
        }
        for (size_t k = 0; k < b->nblocks; k++) {
            const sl_block *bl = &b->blocks[k];
            fprintf(fp, "      block %d %s%s%s: %s, %zu points\n", bl->number,
                    bl->name ? "'" : "", bl->name ? bl->name : "", bl->name ? "'" : "",
                    bl->type == SL_BLOCK_APERTURE ? "APERTURE (cutout)" : "SHIELDING",
                    bl->npoints);
        }
        double mu;
        int fx = beam_fractions(p, b->number, &mu);
        int setup_pos = -1;
        sl_position pos;
        if (sl_plan_beam_position(p, b, &pos, NULL) == SL_OK)
            setup_pos = (int)pos;
        fprintf(fp, "      ");
        if (isfinite(mu))
            fprintf(fp, "%.1f MU per fraction", mu);
        else
            fprintf(fp, "meterset not given");
        if (fx > 0)
            fprintf(fp, ", %d fractions", fx);
        if (setup_pos >= 0)
            fprintf(fp, ", position %s", sl_position_code((sl_position)setup_pos));
        fputc('\n', fp);
    }
    for (size_t i = 0; i < p->notes.count; i++)
        fprintf(fp, "  warning: %s\n", p->notes.items[i]);
}

static void text_structures(FILE *fp, const sl_structure_set *s)
{
    fprintf(fp, "%s: RT Structure Set '%s'\n", s->source, orq(s->label));
    fprintf(fp, "  SOP Instance UID       %s\n", s->sop_instance_uid);
    fprintf(fp, "  patient                %s, ID %s\n", orq(s->patient_name), orq(s->patient_id));
    fprintf(fp, "  frame of reference     %s\n", orq(s->frame_uid));
    fprintf(fp, "  %5s  %-24s %-16s %8s %8s  %s\n", "ROI", "name", "type", "contours", "points",
            "slices z (cm)");
    for (size_t i = 0; i < s->nrois; i++) {
        const sl_roi *r = &s->rois[i];
        double z0, z1;
        char nm[160];
        fprintf(fp, "  %5d  %-24s %-16s %8zu %8zu  ", r->number,
                sl_text_escape(r->name, nm, sizeof nm), orq(r->type), r->ncontours,
                sl_roi_point_count(r));
        if (sl_roi_z_range(r, &z0, &z1))
            fprintf(fp, "%.2f to %.2f\n", cm(z0), cm(z1));
        else
            fprintf(fp, "-\n");
    }
    for (size_t i = 0; i < s->notes.count; i++)
        fprintf(fp, "  warning: %s\n", s->notes.items[i]);
}

/* ------------------------------------------------------------- JSON -- */

static json_object *json_plan(jw *w, const sl_plan *p)
{
    json_object *o = json_object_new_object();
    jw_str(w, o, "file", p->source);
    jw_str(w, o, "kind", "rtplan");
    jw_str(w, o, "sop_instance_uid", p->sop_instance_uid);
    jw_str(w, o, "label", p->label);
    jw_str(w, o, "name", p->name);
    jw_str(w, o, "patient_id", p->patient_id);
    jw_str(w, o, "patient_name", p->patient_name);
    jw_str(w, o, "frame_of_reference_uid", p->frame_uid);
    jw_str(w, o, "referenced_structure_set_uid", p->structure_set_uid);

    json_object *setups = json_object_new_array();
    for (size_t i = 0; i < p->nsetups; i++) {
        json_object *s = json_object_new_object();
        jw_int(w, s, "number", p->setups[i].number);
        jw_str(w, s, "patient_position", sl_position_code(p->setups[i].position));
        jw_append(w, setups, s);
    }
    jw_put(w, o, "setups", setups);

    json_object *groups = json_object_new_array();
    for (size_t g = 0; g < p->ngroups; g++) {
        const sl_fraction_group *fg = &p->groups[g];
        json_object *go = json_object_new_object();
        jw_int(w, go, "number", fg->number);
        if (fg->fractions > 0)
            jw_int(w, go, "fractions_planned", fg->fractions);
        else
            jw_put(w, go, "fractions_planned", NULL);
        json_object *refs = json_object_new_array();
        for (size_t r = 0; r < fg->nrefs; r++) {
            json_object *ro = json_object_new_object();
            jw_int(w, ro, "beam_number", fg->refs[r].beam_number);
            jw_num_opt(w, ro, "meterset_mu", fg->refs[r].meterset_mu);
            jw_num_opt(w, ro, "beam_dose_gy", fg->refs[r].beam_dose_gy);
            jw_append(w, refs, ro);
        }
        jw_put(w, go, "beams", refs);
        jw_append(w, groups, go);
    }
    jw_put(w, o, "fraction_groups", groups);

    json_object *drs = json_object_new_array();
    for (size_t d = 0; d < p->ndose_refs; d++) {
        json_object *dr = json_object_new_object();
        jw_int(w, dr, "number", p->dose_refs[d].number);
        jw_str(w, dr, "type", p->dose_refs[d].type);
        jw_str(w, dr, "description", p->dose_refs[d].description);
        jw_num_opt(w, dr, "target_prescription_gy", p->dose_refs[d].target_prescription_gy);
        jw_append(w, drs, dr);
    }
    jw_put(w, o, "dose_references", drs);

    json_object *beams = json_object_new_array();
    for (size_t i = 0; i < p->nbeams; i++) {
        const sl_beam *b = &p->beams[i];
        json_object *bo = json_object_new_object();
        const char *skip = sl_beam_skip_reason(b);
        jw_int(w, bo, "number", b->number);
        jw_str(w, bo, "name", b->name);
        jw_str(w, bo, "description", b->description);
        jw_str(w, bo, "radiation_type", b->radiation_type);
        jw_str(w, bo, "treatment_delivery_type", b->delivery_type);
        jw_str(w, bo, "beam_type", b->beam_type);
        jw_str(w, bo, "treatment_machine", b->machine);
        jw_bool(w, bo, "estimated", skip == NULL);
        jw_str(w, bo, "skip_reason", skip);
        jw_num(w, bo, "sad_cm", cm(b->sad_mm));
        jw_bool(w, bo, "sad_assumed", b->sad_defaulted);
        jw_int(w, bo, "control_points", (long long)b->ncontrol_points);
        jw_num_opt(w, bo, "energy_mev", b->energy_mev);
        jw_num_opt(w, bo, "gantry_deg", b->gantry_deg);
        jw_num_opt(w, bo, "collimator_deg", b->collimator_deg);
        jw_num_opt(w, bo, "couch_deg", b->couch_deg);
        jw_num_opt(w, bo, "table_top_eccentric_deg", b->eccentric_deg);
        if (b->has_isocenter) {
            json_object *iso = json_object_new_array();
            jw_append(w, iso, jw_number(w, cm(b->isocenter_mm.x), "isocenter_cm"));
            jw_append(w, iso, jw_number(w, cm(b->isocenter_mm.y), "isocenter_cm"));
            jw_append(w, iso, jw_number(w, cm(b->isocenter_mm.z), "isocenter_cm"));
            jw_put(w, bo, "isocenter_cm", iso);
        } else {
            jw_put(w, bo, "isocenter_cm", NULL);
        }
        jw_num_opt(w, bo, "ssd_cm", cm(b->ssd_mm));
        if (b->applicator.present) {
            const sl_applicator *a = &b->applicator;
            json_object *ao = json_object_new_object();
            jw_str(w, ao, "id", a->id);
            jw_str(w, ao, "type", a->type);
            jw_str(w, ao, "description", a->description);
            jw_str(w, ao, "aperture_shape", a->aperture_shape);
            jw_num_opt(w, ao, "opening_cm", cm(a->opening_mm));
            jw_num_opt(w, ao, "opening_x_cm", cm(a->opening_x_mm));
            jw_num_opt(w, ao, "opening_y_cm", cm(a->opening_y_mm));
            jw_num_opt(w, ao, "source_to_applicator_cm", cm(a->source_to_applicator_mm));
            jw_put(w, bo, "applicator", ao);
        } else {
            jw_put(w, bo, "applicator", NULL);
        }
        json_object *blocks = json_object_new_array();
        for (size_t k = 0; k < b->nblocks; k++) {
            const sl_block *bl = &b->blocks[k];
            json_object *blo = json_object_new_object();
            jw_int(w, blo, "number", bl->number);
            jw_str(w, blo, "name", bl->name);
            jw_str(w, blo, "tray_id", bl->tray_id);
            jw_str(w, blo, "type", bl->type == SL_BLOCK_APERTURE ? "APERTURE" : "SHIELDING");
            jw_str(w, blo, "divergence",
                   bl->divergent == 1 ? "PRESENT" : bl->divergent == 0 ? "ABSENT" : NULL);
            jw_num_opt(w, blo, "source_to_tray_cm", cm(bl->source_to_tray_mm));
            jw_num_opt(w, blo, "thickness_cm", cm(bl->thickness_mm));
            jw_num_opt(w, blo, "transmission", bl->transmission);
            jw_str(w, blo, "material", bl->material);
            jw_int(w, blo, "points", (long long)bl->npoints);
            json_object *pts = json_object_new_array();
            for (size_t q = 0; q < bl->npoints; q++) {
                json_object *pt = json_object_new_array();
                jw_append(w, pt, jw_number(w, cm(bl->points[q].x), "points_cm"));
                jw_append(w, pt, jw_number(w, cm(bl->points[q].y), "points_cm"));
                jw_append(w, pts, pt);
            }
            jw_put(w, blo, "points_cm", pts);
            jw_append(w, blocks, blo);
        }
        jw_put(w, bo, "blocks", blocks);
        json_object *boli = json_object_new_array();
        for (size_t k = 0; k < b->nboli; k++)
            jw_append(w, boli, json_object_new_int(b->bolus_roi_numbers[k]));
        jw_put(w, bo, "referenced_bolus_roi_numbers", boli);
        if (b->setup_number >= 0)
            jw_int(w, bo, "setup_number", b->setup_number);
        else
            jw_put(w, bo, "setup_number", NULL);
        sl_position pos;
        jw_str(w, bo, "patient_position",
               sl_plan_beam_position(p, b, &pos, NULL) == SL_OK ? sl_position_code(pos) : NULL);
        jw_append(w, beams, bo);
    }
    jw_put(w, o, "beams", beams);
    jw_put(w, o, "warnings", jw_notes(w, &p->notes));
    return o;
}

static json_object *json_structures(jw *w, const sl_structure_set *s)
{
    json_object *o = json_object_new_object();
    jw_str(w, o, "file", s->source);
    jw_str(w, o, "kind", "rtstruct");
    jw_str(w, o, "sop_instance_uid", s->sop_instance_uid);
    jw_str(w, o, "label", s->label);
    jw_str(w, o, "patient_id", s->patient_id);
    jw_str(w, o, "patient_name", s->patient_name);
    jw_str(w, o, "frame_of_reference_uid", s->frame_uid);
    json_object *rois = json_object_new_array();
    for (size_t i = 0; i < s->nrois; i++) {
        const sl_roi *r = &s->rois[i];
        json_object *ro = json_object_new_object();
        jw_int(w, ro, "number", r->number);
        jw_str(w, ro, "name", r->name);
        jw_str(w, ro, "type", r->type);
        jw_str(w, ro, "frame_of_reference_uid", r->frame_uid);
        if (r->has_color) {
            json_object *c = json_object_new_array();
            for (int k = 0; k < 3; k++)
                jw_append(w, c, json_object_new_int(r->color[k]));
            jw_put(w, ro, "color_rgb", c);
        } else {
            jw_put(w, ro, "color_rgb", NULL);
        }
        jw_int(w, ro, "contours", (long long)r->ncontours);
        jw_int(w, ro, "points", (long long)sl_roi_point_count(r));
        json_object *types = json_object_new_object();
        for (int t = SL_CONTOUR_POINT; t <= SL_CONTOUR_CLOSEDPLANAR_XOR; t++) {
            long long n = 0;
            for (size_t k = 0; k < r->ncontours; k++)
                n += r->contours[k].type == (sl_contour_type)t;
            if (n)
                jw_int(w, types, sl_contour_type_code((sl_contour_type)t), n);
        }
        jw_put(w, ro, "contour_types", types);
        double z0, z1;
        if (sl_roi_z_range(r, &z0, &z1)) {
            jw_num(w, ro, "z_min_cm", cm(z0));
            jw_num(w, ro, "z_max_cm", cm(z1));
        } else {
            jw_put(w, ro, "z_min_cm", NULL);
            jw_put(w, ro, "z_max_cm", NULL);
        }
        jw_append(w, rois, ro);
    }
    jw_put(w, o, "rois", rois);
    jw_put(w, o, "warnings", jw_notes(w, &s->notes));
    return o;
}

sl_status sl_report_inspect(FILE *fp, sl_format fmt, const sl_dicom_object *objs, size_t n,
                            sl_error *err)
{
    if (fmt == SL_FORMAT_CSV)
        return sl_error_set(err, SL_EUSAGE, "inspect writes text or json, not csv");
    if (fmt == SL_FORMAT_TEXT) {
        for (size_t i = 0; i < n; i++) {
            if (i)
                fputc('\n', fp);
            if (objs[i].kind == SL_DICOM_RTPLAN)
                text_plan(fp, objs[i].plan);
            else
                text_structures(fp, objs[i].structures);
        }
        return ferror(fp) ? sl_error_set(err, SL_EIO, "cannot write the output") : SL_OK;
    }
    jw w = {err, SL_OK};
    json_object *root = json_object_new_object();
    jw_str(&w, root, "tool", "strayline");
    jw_str(&w, root, "version", sl_version());
    json_object *files = json_object_new_array();
    for (size_t i = 0; i < n; i++) {
        json_object *o = objs[i].kind == SL_DICOM_RTPLAN ? json_plan(&w, objs[i].plan)
                                                         : json_structures(&w, objs[i].structures);
        jw_append(&w, files, o);
    }
    jw_put(&w, root, "files", files);
    return jw_write(&w, root, fp);
}
