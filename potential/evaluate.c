/* Model evaluation against a dataset; see evaluate.h. */
#include "potential/evaluate.h"

#include "potential/ensemble.h"
#include "potential/network.h"
#include "potential/potential.h"

#include <math.h>
#include <omp.h>
#include <stdlib.h>
#include <string.h>

#define NOVAL ((double)NAN)

/* Sorting helpers for ranks. */
typedef struct keyed {
    double v;
    int i;
} keyed;

static int cmp_keyed(const void *a, const void *b)
{
    const keyed *x = a, *y = b;
    if (x->v < y->v)
        return -1;
    if (x->v > y->v)
        return 1;
    return x->i - y->i;
}

static int cmp_double(const void *a, const void *b)
{
    double x = *(const double *)a, y = *(const double *)b;
    return x < y ? -1 : x > y;
}

/* Average ranks (1-based) of v into r. 0 or -1 (no memory). */
static int ranks(int n, const double *v, double *r)
{
    keyed *k = malloc((size_t)(n > 0 ? n : 1) * sizeof *k);
    if (!k)
        return -1;
    for (int i = 0; i < n; i++) {
        k[i].v = v[i];
        k[i].i = i;
    }
    qsort(k, (size_t)n, sizeof *k, cmp_keyed);
    for (int i = 0; i < n;) {
        int j = i;
        while (j + 1 < n && k[j + 1].v == k[i].v)
            j++;
        double avg = 0.5 * (i + j) + 1;
        for (int q = i; q <= j; q++)
            r[k[q].i] = avg;
        i = j + 1;
    }
    free(k);
    return 0;
}

/* Pearson correlation; NaN if a side is constant. */
static double pearson(int n, const double *a, const double *b)
{
    double ma = 0, mb = 0;
    for (int i = 0; i < n; i++) {
        ma += a[i];
        mb += b[i];
    }
    ma /= n;
    mb /= n;
    double sab = 0, saa = 0, sbb = 0;
    for (int i = 0; i < n; i++) {
        sab += (a[i] - ma) * (b[i] - mb);
        saa += (a[i] - ma) * (a[i] - ma);
        sbb += (b[i] - mb) * (b[i] - mb);
    }
    if (saa <= 0 || sbb <= 0)
        return NOVAL;
    return sab / sqrt(saa * sbb);
}

double nd_evaluate_spearman(int n, const double *a, const double *b)
{
    if (n < 2)
        return NOVAL;
    double *ra = malloc((size_t)n * sizeof(double)), *rb = malloc((size_t)n * sizeof(double));
    double rho = NOVAL;
    if (ra && rb && ranks(n, a, ra) == 0 && ranks(n, b, rb) == 0)
        rho = pearson(n, ra, rb);
    free(ra);
    free(rb);
    return rho;
}

/* Quantile q of sorted v[0..n) by linear interpolation between order
 * statistics (numpy's default "linear" method). */
static double quantile(int n, const double *v, double q)
{
    double pos = q * (n - 1);
    int lo = (int)floor(pos);
    int hi = lo + 1 < n ? lo + 1 : lo;
    return v[lo] + (pos - lo) * (v[hi] - v[lo]);
}

int nd_evaluate_dataset(const nd_model *model, const nd_dataset *data, nd_evaluation *out,
                        nd_error *err)
{
    memset(out, 0, sizeof *out);
    const long ns = nd_dataset_count(data);
    const int K = nd_model_members(model);
    const int nkeys = nd_dataset_key_count(data);
    out->structures = ns;
    out->atoms = nd_dataset_atoms(data);
    out->molecules = nkeys;
    out->members = K;
    double *pe = malloc((size_t)(ns + 1) * sizeof(double));
    double *es = malloc((size_t)(ns + 1) * sizeof(double));
    double *fsp = malloc((size_t)(out->atoms + 1) * sizeof(double));
    double *ferr = malloc((size_t)(out->atoms + 1) * sizeof(double));
    long nfa = 0; /* atoms with reference forces */
    double el_abs[ND_MAX_Z + 1] = {0}, el_sq[ND_MAX_Z + 1] = {0};
    long el_n[ND_MAX_Z + 1] = {0};
    int el_seen[ND_MAX_Z + 1] = {0};
    int s = ND_OK;
    if (!pe || !es || !fsp || !ferr) {
        s = nd_fail(err, ND_ENOMEM, "evaluate: out of memory");
        goto done;
    }
    /* 1. predictions, structure-parallel: each structure writes its own
     * slots (energy, spread, forces and per-atom spread at its atom offset),
     * so the figures below do not depend on the thread count */
    long *aoff = malloc((size_t)(ns + 1) * sizeof(long));
    double *pf = malloc(3 * (size_t)(out->atoms + 1) * sizeof(double));
    double *pfs = malloc((size_t)(out->atoms + 1) * sizeof(double));
    if (!aoff || !pf || !pfs) {
        free(aoff);
        free(pf);
        free(pfs);
        s = nd_fail(err, ND_ENOMEM, "evaluate: out of memory");
        goto done;
    }
    aoff[0] = 0;
    for (long i = 0; i < ns; i++) {
        nd_dataset_entry e;
        nd_dataset_get(data, i, &e);
        aoff[i + 1] = aoff[i] + e.natoms;
    }
    long bad = ns;
#pragma omp parallel
    {
        double me[ND_MODEL_MAX_MEMBERS];
        nd_error e1;
        /* the thread's potential, kept while the structures have the same
         * atoms (a dataset lists the structures of a molecule together):
         * making one folds the model's first layer and sizes workspaces */
        nd_potential *p = NULL;
        const int *pz = NULL;
        int pn = -1;
#pragma omp for schedule(dynamic, 4)
        for (long i = 0; i < ns; i++) {
            nd_dataset_entry e;
            nd_dataset_get(data, i, &e);
            const int n = e.natoms;
            double *mg = NULL;
            int st = nd_model_check_atoms(model, n, e.z, e.charge, &e1);
            if (st == ND_OK && !(p && pn == n && !memcmp(pz, e.z, (size_t)n * sizeof(int)))) {
                nd_potential_free(p);
                p = NULL;
                pn = -1;
                st = nd_potential_new(&p, model, n, e.z, ND_POTENTIAL_MEAN, &e1);
                if (st == ND_OK) {
                    pz = e.z;
                    pn = n;
                }
            }
            if (st == ND_OK && K > 1 &&
                !(mg = malloc((size_t)K * 3 * (size_t)n * sizeof(double))))
                st = nd_fail(&e1, ND_ENOMEM, "out of memory");
            if (st == ND_OK)
                st = nd_potential_compute(p, 1, e.xyz, &pe[i], pf + 3 * aoff[i], me, mg, &e1);
            if (st == ND_OK) {
                es[i] = 0;
                if (K > 1) {
                    nd_ensemble_stats(K, me, NULL, &es[i]);
                    /* per-atom spread: root of the summed per-component variances */
                    for (int a = 0; a < n; a++) {
                        double var = 0;
                        for (int c = 0; c < 3; c++) {
                            double v[ND_MODEL_MAX_MEMBERS], sd;
                            for (int k = 0; k < K; k++)
                                v[k] = mg[(size_t)k * 3 * n + 3 * (size_t)a + c];
                            nd_ensemble_stats(K, v, NULL, &sd);
                            var += sd * sd;
                        }
                        pfs[aoff[i] + a] = sqrt(var);
                    }
                }
            } else {
                nd_error_prefix(&e1, "structure %ld (molecule %s)", i + 1, e.key);
#pragma omp critical(nd_evaluate_err)
                if (i < bad) {
                    bad = i;
                    s = st;
                    if (err)
                        *err = e1;
                }
            }
            free(mg);
        }
        nd_potential_free(p);
    }
    /* 2. the figures, in structure order */
    double ea = 0, eq = 0, aa = 0, aq = 0, fa = 0, fq = 0;
    for (long i = 0; i < ns && s == ND_OK; i++) {
        nd_dataset_entry e;
        nd_dataset_get(data, i, &e);
        const int n = e.natoms;
        const double *g = pf + 3 * aoff[i];
        double dE = pe[i] - e.energy;
        ea += fabs(dE);
        eq += dE * dE;
        aa += fabs(dE) / n;
        aq += dE * dE / ((double)n * n);
        for (int a = 0; a < n; a++)
            el_seen[e.z[a]] = 1;
        if (e.forces)
            for (int a = 0; a < n; a++) {
                double len2 = 0;
                for (int c = 0; c < 3; c++) {
                    double r = -g[3 * a + c] - e.forces[3 * a + c];
                    fa += fabs(r);
                    fq += r * r;
                    el_abs[e.z[a]] += fabs(r);
                    el_sq[e.z[a]] += r * r;
                    len2 += r * r;
                }
                el_n[e.z[a]] += 3;
                ferr[nfa] = sqrt(len2);
                if (K > 1)
                    fsp[nfa] = pfs[aoff[i] + a];
                nfa++;
            }
    }
    free(aoff);
    free(pf);
    free(pfs);
    if (s)
        goto done;
    double dn = ns > 0 ? (double)ns : NOVAL;
    out->energy_mae = ea / dn;
    out->energy_rmse = sqrt(eq / dn);
    out->energy_atom_mae = aa / dn;
    out->energy_atom_rmse = sqrt(aq / dn);
    out->force_components = 3 * nfa;
    out->force_mae = nfa ? fa / (3.0 * (double)nfa) : NOVAL;
    out->force_rmse = nfa ? sqrt(fq / (3.0 * (double)nfa)) : NOVAL;
    for (int z = 1; z <= ND_MAX_Z && out->nelements < ND_EVALUATE_MAX_ELEMENTS; z++)
        if (el_seen[z]) {
            int q = out->nelements++;
            out->z[q] = z;
            out->element_components[q] = el_n[z];
            out->element_force_mae[q] = el_n[z] ? el_abs[z] / (double)el_n[z] : NOVAL;
            out->element_force_rmse[q] = el_n[z] ? sqrt(el_sq[z] / (double)el_n[z]) : NOVAL;
        }
    /* per molecule: relative energies and rank correlation */
    {
        long *first = malloc((size_t)(nkeys + 1) * sizeof(long));
        long *next = malloc((size_t)(ns + 1) * sizeof(long));
        long *last = malloc((size_t)(nkeys + 1) * sizeof(long));
        int *count = calloc((size_t)(nkeys + 1), sizeof(int));
        double *rho = malloc((size_t)(nkeys + 1) * sizeof(double));
        double *a = malloc((size_t)(ns + 1) * sizeof(double)), *b = malloc((size_t)(ns + 1) * sizeof(double));
        if (!first || !next || !last || !count || !rho || !a || !b) {
            s = nd_fail(err, ND_ENOMEM, "evaluate: out of memory");
        } else {
            for (int k = 0; k < nkeys; k++)
                first[k] = last[k] = -1;
            for (long i = 0; i < ns; i++) {
                int k = nd_dataset_key_index(data, i);
                next[i] = -1;
                if (first[k] < 0)
                    first[k] = i;
                else
                    next[last[k]] = i;
                last[k] = i;
                count[k]++;
            }
            double ra = 0;
            long nr = 0;
            int nrho = 0;
            for (int k = 0; k < nkeys; k++) {
                long lo = first[k];
                nd_dataset_entry e, l;
                for (long i = first[k]; i >= 0; i = next[i]) {
                    nd_dataset_get(data, i, &e);
                    nd_dataset_get(data, lo, &l);
                    if (e.energy < l.energy)
                        lo = i;
                }
                nd_dataset_get(data, lo, &l);
                int m = 0;
                for (long i = first[k]; i >= 0; i = next[i]) {
                    nd_dataset_get(data, i, &e);
                    a[m] = pe[i];
                    b[m] = e.energy;
                    m++;
                    if (i == lo)
                        continue;
                    ra += fabs((pe[i] - pe[lo]) - (e.energy - l.energy));
                    nr++;
                }
                if (m >= 3) {
                    double r = nd_evaluate_spearman(m, a, b);
                    if (isfinite(r))
                        rho[nrho++] = r;
                }
            }
            out->relative_count = nr;
            out->relative_mae = nr ? ra / (double)nr : NOVAL;
            out->rank_molecules = nrho;
            if (nrho) {
                qsort(rho, (size_t)nrho, sizeof(double), cmp_double);
                out->rank_min = rho[0];
                out->rank_max = rho[nrho - 1];
                out->rank_q1 = quantile(nrho, rho, 0.25);
                out->rank_median = quantile(nrho, rho, 0.5);
                out->rank_q3 = quantile(nrho, rho, 0.75);
            } else
                out->rank_min = out->rank_max = out->rank_q1 = out->rank_median = out->rank_q3 =
                    NOVAL;
        }
        free(first);
        free(next);
        free(last);
        free(count);
        free(rho);
        free(a);
        free(b);
        if (s)
            goto done;
    }
    /* ensembles: spread against error */
    out->energy_spread_mean = out->energy_spread_rank = out->energy_within1 =
        out->energy_within2 = NOVAL;
    out->force_spread_mean = out->force_spread_rank = out->force_within1 = out->force_within2 =
        NOVAL;
    if (K > 1 && ns > 0) {
        double *ae = malloc((size_t)ns * sizeof(double));
        if (!ae) {
            s = nd_fail(err, ND_ENOMEM, "evaluate: out of memory");
            goto done;
        }
        double sm = 0, w1 = 0, w2 = 0;
        for (long i = 0; i < ns; i++) {
            nd_dataset_entry e;
            nd_dataset_get(data, i, &e);
            ae[i] = fabs(pe[i] - e.energy);
            sm += es[i];
            w1 += ae[i] <= es[i];
            w2 += ae[i] <= 2 * es[i];
        }
        out->energy_spread_mean = sm / (double)ns;
        out->energy_within1 = w1 / (double)ns;
        out->energy_within2 = w2 / (double)ns;
        out->energy_spread_rank = ns <= 0x7fffffff ? nd_evaluate_spearman((int)ns, es, ae) : NOVAL;
        free(ae);
        if (nfa > 0) {
            sm = w1 = w2 = 0;
            for (long a = 0; a < nfa; a++) {
                sm += fsp[a];
                w1 += ferr[a] <= fsp[a];
                w2 += ferr[a] <= 2 * fsp[a];
            }
            out->force_spread_mean = sm / (double)nfa;
            out->force_within1 = w1 / (double)nfa;
            out->force_within2 = w2 / (double)nfa;
            out->force_spread_rank =
                nfa <= 0x7fffffff ? nd_evaluate_spearman((int)nfa, fsp, ferr) : NOVAL;
        }
    }
done:
    free(pe);
    free(es);
    free(fsp);
    free(ferr);
    return s;
}
