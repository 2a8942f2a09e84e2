#include "conformers/dedup.h"

#include "conformers/rank.h"
#include "conformers/rmsd.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

struct nd_dedup {
    nd_dedup_options opt;
    int natoms;
    int nheavy;
    int *heavy;       /* heavy-atom indices (all atoms if the molecule has no heavy atom) */
    nd_automorphs sym;
};

nd_dedup_options nd_dedup_defaults(void)
{
    return (nd_dedup_options){.rmsd = 0.125, .energy_tol = 0.05, .max_symmetry = 2000};
}

int nd_dedup_new(const nd_molecule *m, const nd_dedup_options *opt, nd_dedup **out, nd_error *err)
{
    *out = NULL;
    nd_dedup *d = calloc(1, sizeof *d);
    int *keep = calloc((size_t)m->natoms + 1, sizeof *keep);
    if (!d || !keep) {
        free(d);
        free(keep);
        return nd_fail(err, ND_ENOMEM, "out of memory preparing duplicate removal");
    }
    d->opt = opt ? *opt : nd_dedup_defaults();
    d->natoms = m->natoms;
    d->heavy = malloc(((size_t)m->natoms + 1) * sizeof *d->heavy);
    if (!d->heavy) {
        free(keep);
        nd_dedup_free(d);
        return nd_fail(err, ND_ENOMEM, "out of memory preparing duplicate removal");
    }
    for (int i = 0; i < m->natoms; i++)
        if (m->z[i] != 1) {
            keep[i] = 1;
            d->heavy[d->nheavy++] = i;
        }
    if (d->nheavy == 0) /* H2 and the like: compare all atoms */
        for (int i = 0; i < m->natoms; i++) {
            keep[i] = 1;
            d->heavy[d->nheavy++] = i;
        }
    int status = nd_automorphs_find(m, keep, d->opt.max_symmetry, &d->sym, err);
    free(keep);
    if (status != ND_OK) {
        nd_dedup_free(d);
        return status;
    }
    *out = d;
    return ND_OK;
}

void nd_dedup_free(nd_dedup *d)
{
    if (!d)
        return;
    nd_automorphs_free(&d->sym);
    free(d->heavy);
    free(d);
}

double nd_dedup_rmsd(const nd_dedup *d, const double *a, const double *b, int *perm_out)
{
    double best = INFINITY;
    int best_k = 0;
    for (int k = 0; k < d->sym.count; k++) {
        const int *perm = d->sym.perm + (size_t)k * (size_t)d->natoms;
        double r = nd_rmsd_subset(d->nheavy, d->heavy, a, b, perm);
        if (r < best) {
            best = r;
            best_k = k;
        }
    }
    if (perm_out)
        memcpy(perm_out, d->sym.perm + (size_t)best_k * (size_t)d->natoms, (size_t)d->natoms * sizeof *perm_out);
    return best;
}

double nd_dedup_mirror_rmsd(const nd_dedup *d, const double *a, const double *b)
{
    double *m = malloc(3 * ((size_t)d->natoms + 1) * sizeof *m);
    if (!m)
        return -1;
    for (int i = 0; i < d->natoms; i++) {
        m[3 * i] = -b[3 * i];
        m[3 * i + 1] = b[3 * i + 1];
        m[3 * i + 2] = b[3 * i + 2];
    }
    double r = nd_dedup_rmsd(d, a, m, NULL);
    free(m);
    return r;
}

int nd_dedup_symmetry_count(const nd_dedup *d, int *complete)
{
    if (complete)
        *complete = d->sym.complete;
    return d->sym.count;
}

int nd_dedup_mark(const nd_dedup *d, int m, const double *x, const double *energy, int *keep)
{
    int *order = malloc((size_t)(m > 0 ? m : 1) * sizeof *order);
    int *kept = malloc((size_t)(m > 0 ? m : 1) * sizeof *kept);
    if (!order || !kept) {
        free(order);
        free(kept);
        for (int i = 0; i < m; i++) /* no memory: keep all rather than lose conformers */
            keep[i] = -1;
        return m;
    }
    nd_rank_order(m, energy, order);
    size_t stride = 3 * (size_t)d->natoms;
    int nkept = 0;
    for (int r = 0; r < m; r++) {
        int i = order[r];
        keep[i] = -1;
        for (int q = 0; q < nkept; q++) {
            int j = kept[q];
            if (fabs(energy[i] - energy[j]) > d->opt.energy_tol)
                continue;
            if (nd_dedup_rmsd(d, x + (size_t)j * stride, x + (size_t)i * stride, NULL) < d->opt.rmsd) {
                keep[i] = j;
                break;
            }
        }
        if (keep[i] == -1)
            kept[nkept++] = i;
    }
    free(order);
    free(kept);
    return nkept;
}
