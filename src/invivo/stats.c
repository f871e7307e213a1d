/*
 * The statistics of in-vivo readings: per machine, energy, applicator and
 * distance band, the mean log ratio (measured / estimated) with its 95 %
 * confidence interval (Student's t), the spread with its 95 % interval
 * (chi-square), a t test of zero bias, and a chi-square test of whether
 * the spread exceeds what the stated uncertainties explain. Distributions
 * from GSL (gsl_cdf_tdist_*, gsl_cdf_chisq_*).
 *
 * The proposal of a model's transfer uncertainty uses the same readings,
 * pooled per distance band of the model (the transfer uncertainty is a
 * machine's, by band): the spread of the log ratios about zero (so a bias
 * counts as spread unless a model is rescaled, which this does not do) at
 * its 95 % upper bound, less the readings' own uncertainties in quadrature.
 * The model's other components (fit, measurement, setup shift) are not
 * taken out: they are part of the observed spread too, so the proposal
 * counts them twice and errs high, never low. Bands with too few readings
 * keep the model's value: evidence replaces a default only where there is
 * evidence.
 */
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include <gsl/gsl_cdf.h>

#include "strayline/invivo.h"

void sl_invivo_stats_free(sl_invivo_stats *s)
{
    if (!s)
        return;
    for (size_t i = 0; i < s->ngroups; i++) {
        free(s->groups[i].machine);
        free(s->groups[i].energy);
        free(s->groups[i].applicator);
        free(s->groups[i].idx);
    }
    free(s->groups);
    free(s->band_edges);
    free(s->first_date);
    free(s->last_date);
    free(s);
}

static size_t band_of(const sl_invivo_stats *s, double d)
{
    for (size_t b = 0; b < s->nbands; b++)
        if (d < s->band_edges[b])
            return b;
    return s->nbands - 1;
}

/* Order of groups: machine, then energy (numeric where it is one), then
 * applicator, then band. */
typedef struct gkey {
    const sl_log_reading *r;
    size_t band, i;
} gkey;

static int cmp_key(const void *pa, const void *pb)
{
    const gkey *a = pa, *b = pb;
    int c = strcmp(a->r->machine, b->r->machine);
    if (c)
        return c;
    double ea = a->r->energy_mev, eb = b->r->energy_mev;
    if (!isnan(ea) && !isnan(eb) && fabs(ea - eb) > 0.01)
        return ea < eb ? -1 : 1;
    if ((c = strcmp(a->r->energy, b->r->energy)))
        return c;
    if ((c = strcmp(a->r->applicator, b->r->applicator)))
        return c;
    if (a->band != b->band)
        return a->band < b->band ? -1 : 1;
    return a->i < b->i ? -1 : a->i > b->i;
}

static bool same_group(const gkey *a, const gkey *b)
{
    return strcmp(a->r->machine, b->r->machine) == 0 && strcmp(a->r->energy, b->r->energy) == 0 &&
           strcmp(a->r->applicator, b->r->applicator) == 0 && a->band == b->band;
}

static void group_stats(sl_invivo_group *g, const sl_log_readings *rs)
{
    size_t n = g->n;
    double sum = 0;
    for (size_t i = 0; i < n; i++)
        sum += rs->r[g->idx[i]].log_ratio;
    double m = sum / (double)n;
    g->mean_log_ratio = m;
    g->sd_log_ratio = g->ci_lo = g->ci_hi = g->sd_lo = g->sd_hi = NAN;
    g->t = g->p_bias = g->chi2 = g->p_spread = g->extra_sd = NAN;
    g->noutliers = 0;
    double ss = 0, chi2 = 0, u2 = 0;
    for (size_t i = 0; i < n; i++) {
        const sl_log_reading *r = &rs->r[g->idx[i]];
        double d = r->log_ratio - m;
        ss += d * d;
        chi2 += d * d / (r->u_log_ratio * r->u_log_ratio);
        u2 += r->u_log_ratio * r->u_log_ratio;
        if (r->flagged)
            g->noutliers++;
    }
    if (n < 2)
        return;
    double dof = (double)n - 1;
    double s = sqrt(ss / dof);
    g->sd_log_ratio = s;
    double se = s / sqrt((double)n);
    double tq = gsl_cdf_tdist_Pinv(0.975, dof);
    g->ci_lo = m - tq * se;
    g->ci_hi = m + tq * se;
    if (se > 0) {
        g->t = m / se;
        g->p_bias = 2 * gsl_cdf_tdist_Q(fabs(g->t), dof);
    }
    g->sd_lo = s * sqrt(dof / gsl_cdf_chisq_Pinv(0.975, dof));
    g->sd_hi = s * sqrt(dof / gsl_cdf_chisq_Pinv(0.025, dof));
    g->chi2 = chi2;
    g->p_spread = gsl_cdf_chisq_Q(chi2, dof);
    double extra = s * s - u2 / (double)n;
    g->extra_sd = extra > 0 ? sqrt(extra) : 0;
}

sl_status sl_invivo_statistics(const sl_log_readings *rs, const sl_transfer *t,
                               sl_invivo_stats **out, sl_error *err)
{
    *out = NULL;
    sl_invivo_stats *s = calloc(1, sizeof *s);
    if (!s)
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    s->nbands = t->nbands;
    s->band_edges = malloc((t->nbands ? t->nbands : 1) * sizeof *s->band_edges);
    gkey *k = malloc((rs->n ? rs->n : 1) * sizeof *k);
    if (!s->band_edges || !k || t->nbands == 0) {
        free(k);
        sl_invivo_stats_free(s);
        return sl_error_set(err, t->nbands ? SL_ENOMEM : SL_EINTERNAL,
                            t->nbands ? "out of memory" : "in-vivo statistics: no bands");
    }
    for (size_t b = 0; b < t->nbands; b++)
        s->band_edges[b] = t->bands[b].below_cm;
    s->band_edges[t->nbands - 1] = INFINITY;
    for (size_t i = 0; i < rs->n; i++) {
        k[i] = (gkey){&rs->r[i], band_of(s, rs->r[i].distance_cm), i};
        const char *d = rs->r[i].date;
        if (!s->first_date || strcmp(d, s->first_date) < 0) {
            free(s->first_date);
            s->first_date = strdup(d);
        }
        if (!s->last_date || strcmp(d, s->last_date) > 0) {
            free(s->last_date);
            s->last_date = strdup(d);
        }
    }
    qsort(k, rs->n, sizeof *k, cmp_key);
    sl_status st = SL_OK;
    for (size_t i = 0; i < rs->n && st == SL_OK;) {
        size_t j = i + 1;
        while (j < rs->n && same_group(&k[i], &k[j]))
            j++;
        sl_invivo_group *ng = realloc(s->groups, (s->ngroups + 1) * sizeof *ng);
        if (!ng) {
            st = sl_error_set(err, SL_ENOMEM, "out of memory");
            break;
        }
        s->groups = ng;
        sl_invivo_group *g = &s->groups[s->ngroups++];
        memset(g, 0, sizeof *g);
        g->machine = strdup(k[i].r->machine);
        g->energy = strdup(k[i].r->energy);
        g->applicator = strdup(k[i].r->applicator);
        g->band_lo_cm = k[i].band ? s->band_edges[k[i].band - 1] : 0;
        g->band_hi_cm = s->band_edges[k[i].band];
        g->n = j - i;
        g->idx = malloc(g->n * sizeof *g->idx);
        if (!g->machine || !g->energy || !g->applicator || !g->idx) {
            st = sl_error_set(err, SL_ENOMEM, "out of memory");
            break;
        }
        for (size_t q = i; q < j; q++)
            g->idx[q - i] = k[q].i;
        group_stats(g, rs);
        i = j;
    }
    free(k);
    if (st == SL_OK && rs->n && (!s->first_date || !s->last_date))
        st = sl_error_set(err, SL_ENOMEM, "out of memory");
    if (st != SL_OK) {
        sl_invivo_stats_free(s);
        return st;
    }
    *out = s;
    return SL_OK;
}

void sl_invivo_proposal_free(sl_invivo_proposal *p)
{
    if (!p)
        return;
    free(p->old_rel);
    free(p->new_rel);
    free(p->n);
    free(p->rms);
    free(p->u_other);
    free(p->upper);
    free(p->floored);
    free(p->first_date);
    free(p->last_date);
    free(p);
}

sl_status sl_invivo_propose(const sl_model *m, const sl_log_readings *rs,
                            sl_invivo_proposal **out, sl_error *err)
{
    *out = NULL;
    const sl_transfer *t = &m->machine.transfer;
    size_t nb = t->nbands;
    sl_invivo_proposal *p = calloc(1, sizeof *p);
    if (!p)
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    p->nbands = nb;
    p->old_rel = calloc(nb, sizeof *p->old_rel);
    p->new_rel = calloc(nb, sizeof *p->new_rel);
    p->n = calloc(nb, sizeof *p->n);
    p->rms = calloc(nb, sizeof *p->rms);
    p->u_other = calloc(nb, sizeof *p->u_other);
    p->upper = calloc(nb, sizeof *p->upper);
    p->floored = calloc(nb, sizeof *p->floored);
    if (!nb || !p->old_rel || !p->new_rel || !p->n || !p->rms || !p->u_other || !p->upper ||
        !p->floored) {
        sl_invivo_proposal_free(p);
        return sl_error_set(err, nb ? SL_ENOMEM : SL_EINTERNAL,
                            nb ? "out of memory" : "propose: the model has no transfer bands");
    }
    double *sum2 = calloc(nb, sizeof *sum2), *other2 = calloc(nb, sizeof *other2);
    if (!sum2 || !other2) {
        free(sum2);
        free(other2);
        sl_invivo_proposal_free(p);
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    }
    for (size_t i = 0; i < rs->n; i++) {
        const sl_log_reading *r = &rs->r[i];
        if (strcmp(r->machine, m->machine.name) != 0)
            continue;
        size_t b = 0;
        while (b + 1 < nb && !(r->distance_cm < t->bands[b].below_cm))
            b++;
        /* only the reading's own uncertainty is taken out: the model's
         * other components (fit, measurement, setup shift) stay in, so the
         * proposal errs high rather than credit them with transfer error */
        double o = r->u_measured_cgy / r->measured_cgy;
        p->n[b]++;
        sum2[b] += r->log_ratio * r->log_ratio;
        other2[b] += o * o;
        p->nreadings++;
        if (!p->first_date || strcmp(r->date, p->first_date) < 0) {
            free(p->first_date);
            p->first_date = strdup(r->date);
        }
        if (!p->last_date || strcmp(r->date, p->last_date) > 0) {
            free(p->last_date);
            p->last_date = strdup(r->date);
        }
    }
    for (size_t b = 0; b < nb; b++) {
        p->old_rel[b] = t->bands[b].relative;
        p->new_rel[b] = t->bands[b].relative;
        p->rms[b] = p->u_other[b] = p->upper[b] = NAN;
        if (!p->n[b])
            continue;
        double n = (double)p->n[b];
        p->rms[b] = sqrt(sum2[b] / n);
        p->u_other[b] = sqrt(other2[b] / n);
        /* sum r^2 / sigma^2 follows chi-square on n degrees of freedom
         * (about zero, no mean estimated): the 95 % upper bound of sigma */
        p->upper[b] = sqrt(sum2[b] / gsl_cdf_chisq_Pinv(0.05, n));
        if (p->n[b] >= SL_INVIVO_MIN_BAND) {
            double v = p->upper[b] * p->upper[b] - p->u_other[b] * p->u_other[b];
            p->new_rel[b] = v > 0 ? sqrt(v) : 0;
            p->floored[b] = !(p->new_rel[b] >= SL_INVIVO_BAND_FLOOR);
            if (p->floored[b])
                p->new_rel[b] = SL_INVIVO_BAND_FLOOR;
        }
    }
    free(sum2);
    free(other2);
    if (p->nreadings == 0) {
        sl_invivo_proposal_free(p);
        return sl_error_set(err, SL_EINPUT, "the log has no in-vivo reading of machine '%s'",
                            m->machine.name);
    }
    if (!p->first_date || !p->last_date) {
        sl_invivo_proposal_free(p);
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    }
    *out = p;
    return SL_OK;
}

void sl_invivo_scales_free(sl_invivo_scales *s)
{
    if (!s)
        return;
    for (size_t i = 0; i < s->n; i++) {
        free(s->c[i].energy);
        free(s->c[i].applicator);
        free(s->c[i].first_date);
        free(s->c[i].last_date);
    }
    free(s->c);
    free(s);
}

sl_status sl_invivo_propose_scales(const sl_model *m, const sl_log_readings *rs,
                                   sl_invivo_scales **out, sl_error *err)
{
    *out = NULL;
    /* one band covering every distance: the scale is per energy and
     * applicator, as the output it corrects */
    sl_transfer_band band = {INFINITY, 0};
    sl_transfer one = {1, &band, NULL, NULL, false};
    /* only readings where the model gives its own estimate: at a stand-in
     * for an uncommissioned cutout, beyond the measured distances or near
     * the edge the model errs high on purpose, and a scale made there would
     * take that margin away from every field of the energy and applicator */
    sl_log_readings use = {0, calloc(rs->n ? rs->n : 1, sizeof *use.r)};
    if (!use.r)
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    for (size_t i = 0; i < rs->n; i++)
        if (!(rs->r[i].model_flags & SL_INVIVO_SCALE_EXCLUDED))
            use.r[use.n++] = rs->r[i]; /* a shallow copy: the strings stay rs's */
    sl_invivo_stats *st = NULL;
    sl_status rc = sl_invivo_statistics(&use, &one, &st, err);
    if (rc != SL_OK) {
        free(use.r);
        return rc;
    }
    sl_invivo_scales *s = calloc(1, sizeof *s);
    if (s)
        s->c = calloc(st->ngroups ? st->ngroups : 1, sizeof *s->c);
    if (!s || !s->c) {
        sl_invivo_scales_free(s);
        sl_invivo_stats_free(st);
        free(use.r);
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    }
    for (size_t i = 0; i < st->ngroups; i++) {
        const sl_invivo_group *g = &st->groups[i];
        sl_invivo_scale_choice *c = &s->c[s->n++];
        c->energy = strdup(g->energy);
        c->applicator = strdup(g->applicator);
        c->n = g->n;
        c->mean_log_ratio = g->mean_log_ratio;
        c->ci_lo = g->ci_lo;
        c->ci_hi = g->ci_hi;
        c->p_bias = g->p_bias;
        /* distinct patients among the group's readings: a patient's plan
         * revisions are not independent evidence about the machine (found
         * by an independent review: three revisions of one plan scaled a
         * whole energy and applicator) */
        size_t npatients = 0;
        for (size_t j = 0; j < g->n; j++) {
            const char *pu = use.r[g->idx[j]].patient_id;
            bool seen = false;
            for (size_t k = 0; k < j && !seen; k++)
                seen = pu && use.r[g->idx[k]].patient_id &&
                       strcmp(pu, use.r[g->idx[k]].patient_id) == 0;
            npatients += !seen;
        }
        c->npatients = npatients;
        for (size_t j = 0; j < g->n; j++) {
            const char *d = use.r[g->idx[j]].date;
            if (!c->first_date || strcmp(d, c->first_date) < 0) {
                free(c->first_date);
                c->first_date = strdup(d);
            }
            if (!c->last_date || strcmp(d, c->last_date) > 0) {
                free(c->last_date);
                c->last_date = strdup(d);
            }
        }
        if (!c->energy || !c->applicator || !c->first_date || !c->last_date) {
            sl_invivo_scales_free(s);
            sl_invivo_stats_free(st);
            free(use.r);
            return sl_error_set(err, SL_ENOMEM, "out of memory");
        }
        char *end;
        double e = strtod(c->energy, &end);
        c->energy_mev = *end == '\0' && end != c->energy ? e : NAN;
        double f = exp(c->mean_log_ratio);
        if (isnan(c->energy_mev))
            snprintf(c->why, sizeof c->why, "the readings' beams differ in energy (%s MeV)",
                     c->energy);
        else if (c->n < SL_INVIVO_MIN_BAND)
            snprintf(c->why, sizeof c->why, "%zu readings, fewer than %d", c->n,
                     SL_INVIVO_MIN_BAND);
        else if (c->npatients < SL_INVIVO_MIN_PATIENTS)
            snprintf(c->why, sizeof c->why,
                     "readings from %zu patient%s, fewer than %d: readings on one patient are "
                     "not independent evidence about the machine",
                     c->npatients, c->npatients == 1 ? "" : "s", SL_INVIVO_MIN_PATIENTS);
        else if (!(c->p_bias < SL_INVIVO_SCALE_P))
            snprintf(c->why, sizeof c->why,
                     "bias not significant (t test p = %.3g, not below %g)", c->p_bias,
                     SL_INVIVO_SCALE_P);
        else if (!(f >= SL_SCALE_MIN && f <= SL_SCALE_MAX))
            snprintf(c->why, sizeof c->why,
                     "factor %.3g outside the plausible %g to %g: check the readings and the "
                     "model",
                     f, SL_SCALE_MIN, SL_SCALE_MAX);
        else if (!sl_machine_output(&m->machine, c->energy_mev, c->applicator))
            snprintf(c->why, sizeof c->why, "%s MeV, applicator %s is not in the model",
                     c->energy, c->applicator);
        else if (sl_model_find_scale(m, c->energy_mev, c->applicator))
            snprintf(c->why, sizeof c->why,
                     "the model is scaled there already: propose from the unscaled model");
        else
            c->take = true;
    }
    sl_invivo_stats_free(st);
    free(use.r);
    *out = s;
    return SL_OK;
}
