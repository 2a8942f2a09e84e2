/* A model with more symmetry functions than it was trained with
 * (nd_model_widen, model.h): the new features enter the first layer with
 * zero weights, so the widened model gives the same energies, and training
 * from it can learn what they add without starting from random weights. */
#include "potential/model.h"
#include "potential/network.h"

#include <stdlib.h>
#include <string.h>

/* The position in p of each function of o (radial into rmap, angular into
 * amap), each new function used once; -1 when one of o's is missing. */
static int match_functions(const nd_descriptor_params *o, const nd_descriptor_params *p,
                           int *rmap, int *amap, nd_error *err)
{
    unsigned char used[ND_DESC_MAX_RADIAL + ND_DESC_MAX_ANGULAR] = {0};
    for (int i = 0; i < o->nradial; i++) {
        rmap[i] = -1;
        for (int j = 0; j < p->nradial && rmap[i] < 0; j++)
            if (!used[j] && p->radial_eta[j] == o->radial_eta[i] &&
                p->radial_shift[j] == o->radial_shift[i]) {
                rmap[i] = j;
                used[j] = 1;
            }
        if (rmap[i] < 0)
            return nd_fail(err, ND_EINPUT,
                           "the new descriptor lacks the model's radial function %d (eta %g, "
                           "shift %g); a widened descriptor must keep every function",
                           i + 1, o->radial_eta[i], o->radial_shift[i]);
    }
    for (int i = 0; i < o->nangular; i++) {
        amap[i] = -1;
        for (int j = 0; j < p->nangular && amap[i] < 0; j++)
            if (!used[ND_DESC_MAX_RADIAL + j] && p->angular_eta[j] == o->angular_eta[i] &&
                p->angular_zeta[j] == o->angular_zeta[i] &&
                p->angular_lambda[j] == o->angular_lambda[i]) {
                amap[i] = j;
                used[ND_DESC_MAX_RADIAL + j] = 1;
            }
        if (amap[i] < 0)
            return nd_fail(err, ND_EINPUT,
                           "the new descriptor lacks the model's angular set %d (eta %g, zeta "
                           "%d, lambda %+d); a widened descriptor must keep every function",
                           i + 1, o->angular_eta[i], o->angular_zeta[i], o->angular_lambda[i]);
    }
    return ND_OK;
}

int nd_model_widen(nd_model **out, const nd_model *m, const nd_descriptor_params *p,
                   unsigned char *is_new, nd_error *err)
{
    *out = NULL;
    const nd_descriptor_params *o = &m->desc;
    int s = nd_descriptor_check(p, err);
    if (s)
        return s;
    if (p->radial_cutoff != o->radial_cutoff)
        return nd_fail(err, ND_EINPUT,
                       "the new descriptor's radial cutoff %g differs from the model's %g; a "
                       "cutoff changes every feature, so the model cannot be widened to it",
                       p->radial_cutoff, o->radial_cutoff);
    if (o->nangular > 0 && p->angular_cutoff != o->angular_cutoff)
        return nd_fail(err, ND_EINPUT,
                       "the new descriptor's angular cutoff %g differs from the model's %g; a "
                       "cutoff changes every feature, so the model cannot be widened to it",
                       p->angular_cutoff, o->angular_cutoff);
    int rmap[ND_DESC_MAX_RADIAL], amap[ND_DESC_MAX_ANGULAR];
    if ((s = match_functions(o, p, rmap, amap, err)))
        return s;
    nd_model_spec spec;
    nd_model_spec_defaults(&spec);
    spec.nelements = m->nel;
    memcpy(spec.z, m->z, (size_t)m->nel * sizeof(int));
    spec.descriptor = *p;
    spec.nhidden = m->nhidden;
    for (int l = 0; l < m->nhidden; l++)
        spec.hidden[l] = m->width[l + 1];
    spec.members = m->nmembers;
    spec.neutral_only = m->neutral_only;
    nd_model *w;
    if ((s = nd_model_new(&w, &spec, 0, err)))
        return s;
    if ((s = nd_model_set_provenance(w, m->provenance, err))) {
        nd_model_free(w);
        return s;
    }
    /* old feature f goes to fmap[f] (layout of descriptor.h) */
    const int nel = m->nel, Do = m->D, Dn = w->D;
    int *fmap = malloc((size_t)Do * sizeof(int));
    if (!fmap) {
        nd_model_free(w);
        return nd_fail(err, ND_ENOMEM, "model: out of memory");
    }
    for (int e = 0; e < nel; e++)
        for (int r = 0; r < o->nradial; r++)
            fmap[e * o->nradial + r] = e * p->nradial + rmap[r];
    for (int q = 0; q < nel * (nel + 1) / 2; q++)
        for (int a = 0; a < o->nangular; a++)
            fmap[nel * o->nradial + q * o->nangular + a] =
                nel * p->nradial + q * p->nangular + amap[a];
    if (is_new)
        memset(is_new, 1, (size_t)Dn);
    for (int f = 0; f < Do; f++)
        if (is_new)
            is_new[fmap[f]] = 0;
    for (int e = 0; e < nel; e++) {
        for (int f = 0; f < Dn; f++) { /* new features: unscaled until the caller fits them */
            w->mu[(size_t)e * Dn + f] = 0;
            w->scale[(size_t)e * Dn + f] = 1;
        }
        for (int f = 0; f < Do; f++) {
            w->mu[(size_t)e * Dn + fmap[f]] = m->mu[(size_t)e * Do + f];
            w->scale[(size_t)e * Dn + fmap[f]] = m->scale[(size_t)e * Do + f];
        }
        w->offset[e] = m->offset[e];
        for (int k = 0; k < m->nmembers; k++) {
            const int h = m->width[1];
            const double *wo = nd_net_weights(m, e, 1, k);
            double *wn = nd_net_weights(w, e, 1, k);
            memset(wn, 0, (size_t)h * (size_t)Dn * sizeof(double));
            for (int j = 0; j < h; j++)
                for (int f = 0; f < Do; f++)
                    wn[(size_t)j * Dn + fmap[f]] = wo[(size_t)j * Do + f];
            memcpy(nd_net_bias(w, e, 1, k), nd_net_bias(m, e, 1, k), (size_t)h * sizeof(double));
            for (int l = 2; l <= m->nhidden + 1; l++) {
                size_t nw = (size_t)m->width[l] * (size_t)m->width[l - 1];
                memcpy(nd_net_weights(w, e, l, k), nd_net_weights(m, e, l, k), nw * sizeof(double));
                memcpy(nd_net_bias(w, e, l, k), nd_net_bias(m, e, l, k),
                       (size_t)m->width[l] * sizeof(double));
            }
        }
    }
    free(fmap);
    *out = w;
    return ND_OK;
}
