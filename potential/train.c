/* The trainer: split, offsets, standardisation, exact loss gradients,
 * Adam, schedule, early stopping, ensembles, checkpoints. See train.h.
 *
 * Work is cut into chunks of CHUNK structures. A chunk is evaluated by one
 * thread: neighbour lists and descriptors per structure, then the networks
 * over all atoms of the chunk grouped by element (one dgemm per layer and
 * element), then forces, residuals and tangents per structure, then the
 * reverse pass. Each chunk writes its own gradient buffer and figures, and
 * they are summed in chunk order, so the bits do not depend on the number
 * of threads. */
#include "potential/train.h"
#include "core/readfile.h"
#include "core/numeric.h"

#include "core/elements.h"
#include "core/rng.h"
#include "potential/descriptor.h"
#include "potential/neighbors.h"
#include "potential/net_tangent.h"
#include "potential/network.h"

#include <cblas.h>
#include <cjson/cJSON.h>
#include <errno.h>
#include <lapacke.h>
#include <math.h>
#include <omp.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#define CHUNK 8              /* structures per chunk of a minibatch */
#define EVAL_CHUNK 16        /* structures per chunk of an evaluation */
#define STATE_MAGIC "nadir-training-state 1\n"
#define MEMBER_SCALARS 8     /* per-member numbers of the state */
#define NOVAL ((double)NAN)  /* nothing to measure */

void nd_train_config_defaults(nd_train_config *c)
{
    memset(c, 0, sizeof *c);
    c->nhidden = 2;
    c->hidden[0] = 96;
    c->hidden[1] = 64;
    c->members = 4;
    c->epochs = 200;
    c->batch = 32;
    c->force_weight = 1.0;
    c->validation_fraction = 0.1;
    c->learning_rate = 1e-3;
    c->min_learning_rate = 1e-5;
    c->lr_patience = 5;
    c->stop_patience = 25;
    c->weight_decay = 1e-6;
    c->seed = 1;
    c->neutral_only = 1;
    nd_descriptor_defaults(&c->descriptor);
}

/* ------------------------------------------------------------ chunk work */

/* Per-thread working memory, grown as needed. */
typedef struct cws {
    int cap_atoms, cap_nn;
    size_t cap_pairs, cap_tan, cap_scr;
    nd_neighbors nb;
    double *x, *G, *A0, *U, *AD0, *Eat, *Tat, *cE, *cT, *g, *res, *gj, *v, *scr, *tan;
    int *species, *row, *start, *list, *iscr;
} cws;

/* Figures of one chunk, summed in chunk order. */
typedef struct sums {
    double loss, e_abs, e_sq, f_abs, f_sq;
    long ne, nf;
} sums;

/* Loss weights of one evaluation: energy term coefficient per structure
 * (ew / |B|) and force term coefficient per component (fw / C). */
typedef struct weights {
    double ce, cf;
} weights;

static void cws_free(cws *w)
{
    if (!w)
        return;
    nd_neighbors_free(&w->nb);
    double *d[] = {w->x,  w->G,   w->A0, w->U,  w->AD0, w->Eat, w->Tat, w->cE,
                   w->cT, w->g, w->res, w->gj, w->v,  w->scr, w->tan};
    for (size_t i = 0; i < sizeof d / sizeof d[0]; i++)
        free(d[i]);
    free(w->species);
    free(w->row);
    free(w->start);
    free(w->list);
    free(w->iscr);
    free(w);
}

/* realloc keeping the old block on failure; 0 or -1. */
static int grow(void *pp, size_t bytes)
{
    void **p = pp;
    void *q = realloc(*p, bytes ? bytes : 1);
    if (!q)
        return -1;
    *p = q;
    return 0;
}

/* Sizes w for N atoms of a model (per-atom buffers and network work). */
static int cws_atoms(cws *w, const struct nd_model *m, int N)
{
    if (N <= w->cap_atoms)
        return 0;
    size_t n = (size_t)N, D = (size_t)m->D, dd = sizeof(double);
    if (grow(&w->x, 3 * n * dd) || grow(&w->G, n * D * dd) || grow(&w->A0, n * D * dd) ||
        grow(&w->U, n * D * dd) || grow(&w->AD0, n * D * dd) || grow(&w->Eat, n * dd) ||
        grow(&w->Tat, n * dd) || grow(&w->cE, n * dd) || grow(&w->cT, n * dd) ||
        grow(&w->g, 3 * n * dd) || grow(&w->res, 3 * n * dd) || grow(&w->v, D * dd) ||
        grow(&w->species, n * sizeof(int)) || grow(&w->row, n * sizeof(int)) ||
        grow(&w->start, (n + 1) * sizeof(int)))
        return -1;
    size_t tan = nd_net_tangent_work_doubles(m, N);
    if (tan > w->cap_tan) {
        if (grow(&w->tan, tan * dd))
            return -1;
        w->cap_tan = tan;
    }
    w->cap_atoms = N;
    return 0;
}

/* Sizes the neighbour-dependent scratch. */
static int cws_nn(cws *w, const struct nd_model *m, int maxnn, size_t pairs)
{
    if (pairs > w->cap_pairs) {
        if (grow(&w->list, pairs * sizeof(int)))
            return -1;
        w->cap_pairs = pairs;
    }
    if (maxnn > w->cap_nn || !w->gj) {
        int nn = maxnn > 1 ? maxnn : 1;
        size_t scr = nd_descriptor_scratch_doubles(&m->desc, m->nel, nn); /* covers the tangent */
        if (grow(&w->gj, 3 * (size_t)nn * sizeof(double)) || grow(&w->scr, scr * sizeof(double)) ||
            grow(&w->iscr, (size_t)nn * sizeof(int)))
            return -1;
        w->cap_nn = nn;
        w->cap_scr = scr;
    }
    return 0;
}

/* What one chunk evaluation should do. */
typedef struct job {
    const struct nd_model *m;
    int k;                   /* member */
    const nd_dataset *d;
    weights wt;
    const double *sw;        /* per-structure energy weights (dataset index), or NULL: all 1 */
    const double *eoff;      /* per-structure energy offsets (dataset index), or NULL: all 0 */
    int want_forces;         /* compute forces of structures that have reference forces */
    double *grad;            /* member-vector gradient to add to, or NULL */
    double *pred_e;          /* per structure of the chunk, or NULL */
    double *pred_f;          /* per structure at pred_off[s], or NULL */
    const long *pred_off;
    double *stats;           /* descriptor sums (nel x 2D) instead of a network pass, or NULL */
    long *stat_count;        /* atoms per element for stats */
} job;

/* Evaluates structures idx[0..ns) (see job). Returns ND_OK or an error. */
static int chunk_run(cws *w, const job *jb, const long *idx, int ns, sums *out, nd_error *err)
{
    const struct nd_model *m = jb->m;
    const int D = m->D, nel = m->nel, k = jb->k;
    memset(out, 0, sizeof *out);
    int N = 0;
    for (int s = 0; s < ns; s++) {
        nd_dataset_entry e;
        nd_dataset_get(jb->d, idx[s], &e);
        N += e.natoms;
    }
    if (cws_atoms(w, m, N) || grow(&w->start, ((size_t)N + 1) * sizeof(int)))
        return nd_fail(err, ND_ENOMEM, "train: out of memory for %d atoms", N);
    /* coordinates, species, neighbour lists (chunk-global indices) */
    int a0 = 0, maxnn = 0;
    size_t npairs = 0;
    w->start[0] = 0;
    int first_atom[EVAL_CHUNK > CHUNK ? EVAL_CHUNK + 1 : CHUNK + 1];
    if (ns > (int)(sizeof first_atom / sizeof first_atom[0]) - 1)
        return nd_fail(err, ND_EINVAL, "train: chunk of %d structures is too large", ns);
    for (int s = 0; s < ns; s++) {
        nd_dataset_entry e;
        nd_dataset_get(jb->d, idx[s], &e);
        first_atom[s] = a0;
        memcpy(w->x + 3 * (size_t)a0, e.xyz, 3 * (size_t)e.natoms * sizeof(double));
        for (int i = 0; i < e.natoms; i++)
            w->species[a0 + i] = m->slot_of_z[e.z[i]];
        int st = nd_neighbors_build(&w->nb, 1, e.natoms, e.xyz, nd_model_cutoff(m), err);
        if (st)
            return st;
        size_t np = (size_t)w->nb.start[e.natoms];
        if (cws_nn(w, m, w->nb.maxnn, npairs + np))
            return nd_fail(err, ND_ENOMEM, "train: out of memory for neighbour lists");
        for (size_t q = 0; q < np; q++)
            w->list[npairs + q] = w->nb.list[q] + a0;
        for (int i = 0; i < e.natoms; i++)
            w->start[a0 + i + 1] = (int)npairs + w->nb.start[i + 1];
        npairs += np;
        if (w->nb.maxnn > maxnn)
            maxnn = w->nb.maxnn;
        a0 += e.natoms;
    }
    first_atom[ns] = N;
    /* rows grouped by element, in atom order within each element */
    int cnt[ND_MODEL_MAX_ELEMENTS] = {0}, first[ND_MODEL_MAX_ELEMENTS + 1];
    for (int a = 0; a < N; a++)
        cnt[w->species[a]]++;
    first[0] = 0;
    for (int e = 0; e < nel; e++)
        first[e + 1] = first[e] + cnt[e];
    int fill[ND_MODEL_MAX_ELEMENTS];
    memcpy(fill, first, sizeof fill);
    for (int a = 0; a < N; a++)
        w->row[a] = fill[w->species[a]]++;
    for (int a = 0; a < N; a++)
        nd_descriptor_atom(&m->desc, nel, w->x, w->species, a, w->list + w->start[a],
                           w->start[a + 1] - w->start[a], w->G + (size_t)w->row[a] * D, w->scr,
                           w->iscr);
    if (jb->stats) {
        for (int e = 0; e < nel; e++) {
            double *sm = jb->stats + (size_t)e * 2 * D, *sq = sm + D;
            for (int r = first[e]; r < first[e + 1]; r++) {
                const double *gr = w->G + (size_t)r * D;
                for (int f = 0; f < D; f++) {
                    sm[f] += gr[f];
                    sq[f] += gr[f] * gr[f];
                }
            }
            jb->stat_count[e] += cnt[e];
        }
        return ND_OK;
    }
    /* which structures get forces */
    int any_f = 0;
    unsigned char hasf[EVAL_CHUNK > CHUNK ? EVAL_CHUNK : CHUNK];
    for (int s = 0; s < ns; s++) {
        nd_dataset_entry e;
        nd_dataset_get(jb->d, idx[s], &e);
        hasf[s] = e.forces != NULL && (jb->want_forces || jb->wt.cf != 0);
        any_f |= hasf[s];
    }
    /* primal pass (and U = dE/dG when forces are needed), each element in
     * its own slice of the network work, kept for the reverse pass */
    const size_t per_row = nd_net_tangent_work_doubles(m, 1);
    for (int e = 0; e < nel; e++) {
        if (!cnt[e])
            continue;
        size_t o = (size_t)first[e] * D;
        double *tw = w->tan + (size_t)first[e] * per_row;
        nd_net_input(m, e, cnt[e], w->G + o, w->A0 + o);
        nd_net_tangent_primal(m, e, k, cnt[e], w->A0 + o, tw, w->Eat + first[e]);
        if (any_f)
            nd_net_tangent_input_grad(m, e, k, cnt[e], tw, w->U + o);
    }
    const int tangent = jb->grad && jb->wt.cf != 0 && any_f;
    if (tangent)
        memset(w->AD0, 0, (size_t)N * D * sizeof(double));
    for (int s = 0; s < ns; s++) {
        nd_dataset_entry e;
        nd_dataset_get(jb->d, idx[s], &e);
        const int n = e.natoms, b = first_atom[s];
        double E = 0;
        for (int i = 0; i < n; i++)
            E += w->Eat[w->row[b + i]] + m->offset[w->species[b + i]];
        if (!isfinite(E))
            return nd_fail(err, ND_ECOMPUTE, "train: non-finite energy for structure %ld",
                           idx[s] + 1);
        double dE = E - e.energy, ce = jb->wt.ce * (jb->sw ? jb->sw[idx[s]] : 1.0);
        if (jb->pred_e)
            jb->pred_e[s] = E;
        out->e_abs += fabs(dE);
        out->e_sq += dE * dE;
        if (jb->eoff) /* the loss sees the error less the molecule's offset */
            dE -= jb->eoff[idx[s]];
        out->loss += ce * dE * dE / n;
        out->ne++;
        if (jb->grad)
            for (int i = 0; i < n; i++)
                w->cE[w->row[b + i]] = 2 * ce * dE / n;
        for (int i = 0; i < n; i++)
            w->cT[w->row[b + i]] = 0;
        if (!hasf[s])
            continue;
        /* gradient of the energy: sum over centres of J^T u */
        double *g = w->g + 3 * (size_t)b;
        memset(g, 0, 3 * (size_t)n * sizeof(double));
        for (int i = 0; i < n; i++) {
            int a = b + i, s0 = w->start[a], nn = w->start[a + 1] - s0;
            double gi[3];
            nd_descriptor_atom_grad(&m->desc, nel, w->x, w->species, a, w->list + s0, nn,
                                    w->U + (size_t)w->row[a] * D, gi, w->gj, w->scr, w->iscr);
            for (int c = 0; c < 3; c++)
                g[3 * i + c] += gi[c];
            for (int q = 0; q < nn; q++) {
                int j = w->list[s0 + q] - b;
                for (int c = 0; c < 3; c++)
                    g[3 * j + c] += w->gj[3 * q + c];
            }
        }
        double *res = w->res + 3 * (size_t)b;
        for (int c = 0; c < 3 * n; c++) {
            double F = -g[c];
            if (!isfinite(F))
                return nd_fail(err, ND_ECOMPUTE, "train: non-finite force for structure %ld",
                               idx[s] + 1);
            res[c] = F - e.forces[c];
            out->loss += jb->wt.cf * res[c] * res[c];
            out->f_abs += fabs(res[c]);
            out->f_sq += res[c] * res[c];
            if (jb->pred_f)
                jb->pred_f[jb->pred_off[s] + c] = F;
        }
        out->nf += 3 * n;
        if (tangent) {
            for (int i = 0; i < n; i++) {
                int a = b + i, s0 = w->start[a], ei = w->species[a];
                nd_descriptor_atom_tangent(&m->desc, nel, w->x, w->species, a, w->list + s0,
                                           w->start[a + 1] - s0, w->res, w->v, w->scr, w->iscr);
                double *ad = w->AD0 + (size_t)w->row[a] * D;
                const double *sc = m->scale + (size_t)ei * D;
                for (int f = 0; f < D; f++)
                    ad[f] = sc[f] * w->v[f];
                w->cT[w->row[a]] = -2 * jb->wt.cf;
            }
        }
    }
    if (!jb->grad)
        return ND_OK;
    size_t blk = nd_net_tangent_block_doubles(m);
    for (int e = 0; e < nel; e++) {
        if (!cnt[e])
            continue;
        size_t o = (size_t)first[e] * D;
        double *tw = w->tan + (size_t)first[e] * per_row;
        const double *ad = tangent ? w->AD0 + o : NULL;
        if (tangent)
            nd_net_tangent_push(m, e, k, cnt[e], ad, tw, w->Tat + first[e]);
        nd_net_tangent_reverse(m, e, k, cnt[e], w->A0 + o, ad, w->cE + first[e], w->cT + first[e],
                               tw, jb->grad + (size_t)e * blk);
    }
    return ND_OK;
}

/* A pool of per-thread workspaces and per-chunk buffers. */
typedef struct runner {
    int nws;
    cws **ws;
    double *cgrad;       /* per-chunk gradients */
    size_t cap_cgrad;    /* chunks it holds */
    sums *csums;
    size_t cap_csums;
    double *cstats;
    long *ccount;
    size_t cap_cstats;
} runner;

static int runner_init(runner *r)
{
    memset(r, 0, sizeof *r);
    r->nws = omp_get_max_threads();
    if (r->nws < 1)
        r->nws = 1;
    r->ws = calloc((size_t)r->nws, sizeof *r->ws);
    if (!r->ws)
        return -1;
    for (int t = 0; t < r->nws; t++)
        if (!(r->ws[t] = calloc(1, sizeof(cws))))
            return -1;
    return 0;
}

static void runner_free(runner *r)
{
    if (r->ws)
        for (int t = 0; t < r->nws; t++)
            cws_free(r->ws[t]);
    free(r->ws);
    free(r->cgrad);
    free(r->csums);
    free(r->cstats);
    free(r->ccount);
    memset(r, 0, sizeof *r);
}

/* Runs jb over structures idx[0..n) in chunks of csize, in parallel, and
 * sums the chunks in order: figures into *tot, gradients (if jb->grad) into
 * jb->grad (overwritten), descriptor sums (if jb->stats) into jb->stats.
 * pred_e (if set) is indexed like idx. */
static int runner_run(runner *r, const job *jb, const long *idx, long n, int csize, sums *tot,
                      nd_error *err)
{
    const struct nd_model *m = jb->m;
    long nch = (n + csize - 1) / csize;
    size_t P = nd_train_member_doubles(m);
    size_t SD = (size_t)m->nel * 2 * (size_t)m->D;
    memset(tot, 0, sizeof *tot);
    if (nch == 0)
        return ND_OK;
    if ((size_t)nch > r->cap_csums) {
        if (grow(&r->csums, (size_t)nch * sizeof(sums)))
            return nd_fail(err, ND_ENOMEM, "train: out of memory");
        r->cap_csums = (size_t)nch;
    }
    if (jb->grad && (size_t)nch > r->cap_cgrad) {
        if (grow(&r->cgrad, (size_t)nch * P * sizeof(double)))
            return nd_fail(err, ND_ENOMEM, "train: out of memory for gradients");
        r->cap_cgrad = (size_t)nch;
    }
    if (jb->stats && (size_t)nch > r->cap_cstats) {
        if (grow(&r->cstats, (size_t)nch * SD * sizeof(double)) ||
            grow(&r->ccount, (size_t)nch * (size_t)m->nel * sizeof(long)))
            return nd_fail(err, ND_ENOMEM, "train: out of memory for descriptor statistics");
        r->cap_cstats = (size_t)nch;
    }
    if (openblas_get_num_threads() != 1)
        openblas_set_num_threads(1);
    int status = ND_OK;
    nd_error first_err;
    nd_error_clear(&first_err);
    long first_bad = nch;
#pragma omp parallel num_threads(r->nws)
    {
        int t = omp_get_thread_num();
        nd_error e1;
#pragma omp for schedule(dynamic, 1)
        for (long c = 0; c < nch; c++) {
            long lo = c * csize, hi = lo + csize < n ? lo + csize : n;
            job cj = *jb;
            if (jb->grad) {
                cj.grad = r->cgrad + (size_t)c * P;
                memset(cj.grad, 0, P * sizeof(double));
            }
            if (jb->pred_e)
                cj.pred_e = jb->pred_e + lo;
            if (jb->pred_off)
                cj.pred_off = jb->pred_off + lo;
            if (jb->stats) {
                cj.stats = r->cstats + (size_t)c * SD;
                cj.stat_count = r->ccount + (size_t)c * m->nel;
                memset(cj.stats, 0, SD * sizeof(double));
                memset(cj.stat_count, 0, (size_t)m->nel * sizeof(long));
            }
            int s = chunk_run(r->ws[t], &cj, idx + lo, (int)(hi - lo), &r->csums[c], &e1);
            if (s) {
#pragma omp critical(nd_train_err)
                if (c < first_bad) {
                    first_bad = c;
                    status = s;
                    first_err = e1;
                }
            }
        }
        /* the chunk gradients summed in chunk order, split over parameters */
        if (jb->grad && status == ND_OK) {
#pragma omp for schedule(static)
            for (size_t q = 0; q < P; q++) {
                double sum = 0;
                for (long c = 0; c < nch; c++)
                    sum += r->cgrad[(size_t)c * P + q];
                jb->grad[q] = sum;
            }
        }
    }
    if (status) {
        if (err)
            *err = first_err;
        return status;
    }
    for (long c = 0; c < nch; c++) {
        const sums *cs = &r->csums[c];
        tot->loss += cs->loss;
        tot->e_abs += cs->e_abs;
        tot->e_sq += cs->e_sq;
        tot->f_abs += cs->f_abs;
        tot->f_sq += cs->f_sq;
        tot->ne += cs->ne;
        tot->nf += cs->nf;
        if (jb->stats) {
            const double *cs2 = r->cstats + (size_t)c * SD;
            for (size_t q = 0; q < SD; q++)
                jb->stats[q] += cs2[q];
            for (int e = 0; e < m->nel; e++)
                jb->stat_count[e] += r->ccount[(size_t)c * m->nel + e];
        }
    }
    return ND_OK;
}

/* ------------------------------------------------------------ member vectors */

size_t nd_train_member_doubles(const nd_model *m)
{
    return (size_t)m->nel * nd_net_tangent_block_doubles(m);
}

/* Copies member k's parameters between the model and theta: into the
 * model when into is 1, out of it (m only read) when 0. */
static void member_copy(nd_model *m, int k, double *theta, int into)
{
    size_t blk = nd_net_tangent_block_doubles(m);
    for (int e = 0; e < m->nel; e++)
        for (int l = 1; l <= m->nhidden + 1; l++) {
            double *w = nd_net_weights(m, e, l, k), *b = nd_net_bias(m, e, l, k);
            double *tw = theta + (size_t)e * blk + nd_net_tangent_w_offset(m, l);
            double *tb = theta + (size_t)e * blk + nd_net_tangent_b_offset(m, l);
            size_t nw = (size_t)m->width[l] * (size_t)m->width[l - 1], nb = (size_t)m->width[l];
            if (into) {
                memcpy(w, tw, nw * sizeof(double));
                memcpy(b, tb, nb * sizeof(double));
            } else {
                memcpy(tw, w, nw * sizeof(double));
                memcpy(tb, b, nb * sizeof(double));
            }
        }
}

void nd_train_member_get(const nd_model *m, int k, double *theta)
{
    member_copy((nd_model *)m, k, theta, 0);
}

void nd_train_member_set(nd_model *m, int k, const double *theta)
{
    member_copy(m, k, (double *)theta, 1);
}

int nd_train_loss(const nd_model *m, int k, const nd_dataset *data, const long *idx, int n,
                  double energy_weight, double force_weight, double *loss, double *grad,
                  nd_error *err)
{
    if (!m || !data || (n > 0 && !idx) || k < 0 || k >= m->nmembers)
        return nd_fail(err, ND_EINVAL, "train: bad arguments to the loss");
    long C = 0;
    for (int s = 0; s < n; s++) {
        nd_dataset_entry e;
        nd_dataset_get(data, idx[s], &e);
        if (e.forces)
            C += 3 * e.natoms;
    }
    job jb = {0};
    jb.m = m;
    jb.k = k;
    jb.d = data;
    jb.wt.ce = n > 0 ? energy_weight / n : 0;
    jb.wt.cf = C > 0 ? force_weight / (double)C : 0;
    jb.grad = grad;
    runner r;
    if (runner_init(&r)) {
        runner_free(&r);
        return nd_fail(err, ND_ENOMEM, "train: out of memory");
    }
    sums tot;
    int s = runner_run(&r, &jb, idx, n, CHUNK, &tot, err);
    runner_free(&r);
    if (s == ND_OK && loss)
        *loss = tot.loss;
    return s;
}

/* ------------------------------------------------------------ the trainer */

typedef struct member {
    double lr, steps, best_crit, best_loss, since_crit, since_loss, active, best_epoch;
} member;

struct nd_train {
    const nd_dataset *d;
    char *name;
    char *start_name;  /* a warm start's model file (cfg.start is not kept), or NULL */
    int widened_from;  /* the start model's descriptor size when widened, else 0 */
    nd_train_config cfg;
    nd_model *model;
    int K;
    size_t P;
    long ntrain, nval, nval_atoms;
    long *train_idx, *val_idx, *val_off, *val_low, *order;
    double *sw;                             /* energy weights per structure, or NULL */
    double *eoff, *pred_tr;                 /* molecule offsets per structure, predictions
                                             * of the training set (molecule_offset > 0) */
    int ntrain_mol, nval_mol;
    int always_matched;      /* molecules of cfg.always_train found in the dataset */
    double *theta, *best, *am, *av, *grad; /* K x P each (grad: P) */
    member *mem;
    double *val_e, *val_f;                  /* K x nval, K x 3 nval_atoms */
    double *mean_f;
    runner run;
    int epoch;
    double elapsed;
    uint64_t fingerprint;
    nd_train_errors last_valid;
};

/* 1-based line of structure i in the JSON Lines file path: the i-th
 * non-blank line after an optional header (first line with "dataset" and
 * no "elements"). 0 if the file cannot be read. Used only for messages. */
static long structure_line(const char *path, long i)
{
    if (!path)
        return 0;
    FILE *f = fopen(path, "rb");
    if (!f)
        return 0;
    char *line = NULL;
    size_t cap = 0;
    ssize_t len;
    long ln = 0, seen = -1, found = 0;
    while ((len = getline(&line, &cap, f)) >= 0) {
        ln++;
        int blank = 1;
        for (ssize_t q = 0; q < len; q++)
            if (line[q] != ' ' && line[q] != '\t' && line[q] != '\r' && line[q] != '\n')
                blank = 0;
        if (blank)
            continue;
        if (ln == 1 && strstr(line, "\"dataset\"") && !strstr(line, "\"elements\""))
            continue;
        if (++seen == i) {
            found = ln;
            break;
        }
    }
    free(line);
    fclose(f);
    return found;
}

/* Formats "NAME, line L" or "structure I" for structure i into buf. */
static void where(const nd_train *t, long i, char *buf, size_t size)
{
    long ln = structure_line(t->name, i);
    if (ln > 0)
        snprintf(buf, size, "%s, line %ld", t->name, ln);
    else
        snprintf(buf, size, "%s, structure %ld", t->name ? t->name : "dataset", i + 1);
}

void nd_train_free(nd_train *t)
{
    if (!t)
        return;
    nd_model_free(t->model);
    free(t->name);
    free(t->start_name);
    free(t->train_idx);
    free(t->val_idx);
    free(t->val_off);
    free(t->val_low);
    free(t->sw);
    free(t->eoff);
    free(t->pred_tr);
    free(t->order);
    free(t->theta);
    free(t->best);
    free(t->am);
    free(t->av);
    free(t->grad);
    free(t->mem);
    free(t->val_e);
    free(t->val_f);
    free(t->mean_f);
    runner_free(&t->run);
    free(t);
}

int nd_train_energy_weights(const nd_dataset *d, double window, const unsigned char *mask,
                            double *w)
{
    long n = nd_dataset_count(d);
    int nk = nd_dataset_key_count(d);
    if (!(window > 0)) {
        for (long s = 0; s < n; s++)
            w[s] = 1;
        return ND_OK;
    }
    double *low = malloc((size_t)(nk > 0 ? nk : 1) * sizeof(double));
    if (!low)
        return ND_ENOMEM;
    for (int q = 0; q < nk; q++)
        low[q] = INFINITY;
    for (long s = 0; s < n; s++) {
        nd_dataset_entry e;
        nd_dataset_get(d, s, &e);
        int q = nd_dataset_key_index(d, s);
        if (e.energy < low[q])
            low[q] = e.energy;
    }
    double sum = 0;
    long cnt = 0;
    for (long s = 0; s < n; s++) {
        nd_dataset_entry e;
        nd_dataset_get(d, s, &e);
        double above = e.energy - low[nd_dataset_key_index(d, s)];
        w[s] = above <= window ? 1.0 : (window / above) * (window / above);
        if (!mask || mask[s]) {
            sum += w[s];
            cnt++;
        }
    }
    free(low);
    double mean = cnt ? sum / (double)cnt : 1.0;
    for (long s = 0; s < n; s++)
        w[s] /= mean;
    return ND_OK;
}

/* Range checks of the settings. */
static int check_config(const nd_train_config *c, nd_error *err)
{
    if (c->members < 1 || c->members > ND_MODEL_MAX_MEMBERS)
        return nd_fail(err, ND_EINPUT, "train: %d members, expected 1 to %d", c->members,
                       ND_MODEL_MAX_MEMBERS);
    if (c->epochs < 0)
        return nd_fail(err, ND_EINPUT, "train: %d epochs, expected 0 or more", c->epochs);
    if (c->batch < 1)
        return nd_fail(err, ND_EINPUT, "train: batch of %d structures, expected 1 or more",
                       c->batch);
    if (!(c->force_weight >= 0) || !isfinite(c->force_weight))
        return nd_fail(err, ND_EINPUT, "train: force weight %g, expected 0 or more",
                       c->force_weight);
    if (!(c->validation_fraction >= 0 && c->validation_fraction < 1))
        return nd_fail(err, ND_EINPUT, "train: validation fraction %g, expected 0 <= f < 1",
                       c->validation_fraction);
    if (!(c->learning_rate > 0) || !(c->min_learning_rate > 0) ||
        c->min_learning_rate > c->learning_rate || !isfinite(c->learning_rate))
        return nd_fail(err, ND_EINPUT,
                       "train: learning rate %g and floor %g, expected 0 < floor <= rate",
                       c->learning_rate, c->min_learning_rate);
    if (c->lr_patience < 1 || c->stop_patience < 1)
        return nd_fail(err, ND_EINPUT, "train: patience must be at least 1 epoch");
    if (!(c->weight_decay >= 0) || !isfinite(c->weight_decay))
        return nd_fail(err, ND_EINPUT, "train: weight decay %g, expected 0 or more",
                       c->weight_decay);
    if (!(c->molecule_offset >= 0 && c->molecule_offset <= 1))
        return nd_fail(err, ND_EINPUT, "train: molecule offset %g, expected 0 to 1",
                       c->molecule_offset);
    if (!(c->energy_window >= 0) || !isfinite(c->energy_window))
        return nd_fail(err, ND_EINPUT, "train: energy window %g kcal/mol, expected 0 or more",
                       c->energy_window);
    if (c->nelements < 0 || c->nelements > ND_MODEL_SPEC_MAX_ELEMENTS)
        return nd_fail(err, ND_EINPUT, "train: %d elements requested", c->nelements);
    return ND_OK;
}

/* Element offsets by linear least squares on the training energies (minimum
 * norm, LAPACKE dgelsd, so collinear compositions do not fail). */
static int fit_offsets(nd_train *t, nd_error *err)
{
    nd_model *m = t->model;
    const int nel = m->nel;
    long rows = t->ntrain > nel ? t->ntrain : nel;
    double *A = calloc((size_t)rows * (size_t)nel, sizeof(double));
    double *b = calloc((size_t)rows, sizeof(double));
    double *sv = calloc((size_t)nel, sizeof(double));
    if (!A || !b || !sv) {
        free(A);
        free(b);
        free(sv);
        return nd_fail(err, ND_ENOMEM, "train: out of memory for the offsets");
    }
    for (long s = 0; s < t->ntrain; s++) {
        nd_dataset_entry e;
        nd_dataset_get(t->d, t->train_idx[s], &e);
        for (int i = 0; i < e.natoms; i++)
            A[(size_t)s * nel + m->slot_of_z[e.z[i]]] += 1;
        b[s] = e.energy;
    }
    lapack_int rank;
    lapack_int info = LAPACKE_dgelsd(LAPACK_ROW_MAJOR, (lapack_int)t->ntrain, nel, 1, A, nel, b, 1,
                                     sv, 1e-10, &rank);
    int s = ND_OK;
    if (info != 0)
        s = nd_fail(err, ND_ECOMPUTE, "train: least squares for the element offsets failed (%d)",
                    (int)info);
    else
        for (int e = 0; e < nel; e++)
            m->offset[e] = isfinite(b[e]) ? b[e] : 0;
    free(A);
    free(b);
    free(sv);
    return s;
}

/* Per-element mean and scale of every feature over the training atoms. */
static int fit_scaling(nd_train *t, const unsigned char *only, nd_error *err)
{
    nd_model *m = t->model;
    const int nel = m->nel, D = m->D;
    double *st = calloc((size_t)nel * 2 * D, sizeof(double));
    long cnt[ND_MODEL_MAX_ELEMENTS] = {0};
    if (!st)
        return nd_fail(err, ND_ENOMEM, "train: out of memory");
    job jb = {0};
    jb.m = m;
    jb.d = t->d;
    jb.stats = st;
    jb.stat_count = cnt;
    sums tot;
    int s = runner_run(&t->run, &jb, t->train_idx, t->ntrain, EVAL_CHUNK, &tot, err);
    if (s == ND_OK)
        for (int e = 0; e < nel; e++)
            for (int f = 0; f < D; f++) {
                if (only && !only[f])
                    continue;
                double n = (double)cnt[e];
                double mu = n > 0 ? st[(size_t)e * 2 * D + f] / n : 0;
                double var = n > 0 ? st[(size_t)e * 2 * D + D + f] / n - mu * mu : 0;
                /* a feature (nearly) constant over the training atoms is left
                 * unscaled, so unseen values do not blow up (common practice,
                 * no source) */
                double sd = var > 0 ? sqrt(var) : 0;
                m->mu[(size_t)e * D + f] = mu;
                m->scale[(size_t)e * D + f] = sd > 1e-4 ? 1 / sd : 1;
            }
    free(st);
    return s;
}

/* FNV-1a of a double's bits. */
static uint64_t hash_double(uint64_t h, double v)
{
    return nd_model_fnv1a64(h, &v, sizeof v);
}

static uint64_t hash_long(uint64_t h, long v)
{
    int64_t x = v;
    return nd_model_fnv1a64(h, &x, sizeof x);
}

/* Fingerprint of the settings (except the epoch limit) and of the data as
 * the networks see it (structure ids, split, offsets, scaling). */
static uint64_t fingerprint(const nd_train *t)
{
    const nd_train_config *c = &t->cfg;
    const nd_model *m = t->model;
    uint64_t h = ND_FNV1A64_INIT;
    h = hash_long(h, m->nel);
    for (int e = 0; e < m->nel; e++)
        h = hash_long(h, m->z[e]);
    h = hash_long(h, c->nhidden);
    for (int l = 0; l < c->nhidden; l++)
        h = hash_long(h, c->hidden[l]);
    h = hash_long(h, c->members);
    h = hash_long(h, c->batch);
    h = hash_double(h, c->force_weight);
    h = hash_double(h, c->validation_fraction);
    h = hash_double(h, c->learning_rate);
    h = hash_double(h, c->min_learning_rate);
    h = hash_long(h, c->lr_patience);
    h = hash_long(h, c->stop_patience);
    h = hash_double(h, c->weight_decay);
    if (c->energy_window > 0) /* only when set: older checkpoints keep their fingerprint */
        h = hash_double(h, c->energy_window);
    if (c->molecule_offset > 0) /* likewise */
        h = hash_double(h, 2 + c->molecule_offset);
    nd_descriptor_params dflt;
    nd_descriptor_defaults(&dflt);
    if (!nd_descriptor_equal(&dflt, &m->desc)) { /* likewise: only a chosen descriptor */
        const nd_descriptor_params *p = &m->desc;
        h = hash_double(h, p->radial_cutoff);
        h = hash_double(h, p->angular_cutoff);
        h = hash_long(h, p->nradial);
        for (int i = 0; i < p->nradial; i++)
            h = hash_double(hash_double(h, p->radial_eta[i]), p->radial_shift[i]);
        h = hash_long(h, p->nangular);
        for (int i = 0; i < p->nangular; i++)
            h = hash_long(hash_long(hash_double(h, p->angular_eta[i]), p->angular_zeta[i]),
                          p->angular_lambda[i]);
    }
    h = nd_model_fnv1a64(h, &c->seed, sizeof c->seed);
    h = hash_long(h, t->ntrain);
    for (long s = 0; s < t->ntrain; s++) {
        nd_dataset_entry e;
        nd_dataset_get(t->d, t->train_idx[s], &e);
        h = nd_model_fnv1a64(h, &e.id, sizeof e.id);
        h = hash_double(h, e.energy);
    }
    h = hash_long(h, t->nval);
    for (long s = 0; s < t->nval; s++) {
        nd_dataset_entry e;
        nd_dataset_get(t->d, t->val_idx[s], &e);
        h = nd_model_fnv1a64(h, &e.id, sizeof e.id);
    }
    /* scaling, offsets and starting weights (a warm start's, or the seeded
     * random ones) */
    h = nd_model_fnv1a64(h, m->params, m->nparams * sizeof(double));
    return h;
}

/* Elements, charges and forces of every structure against the settings. */
static int check_data(nd_train *t, int *z, int *nz, nd_error *err)
{
    char at[600];
    long n = nd_dataset_count(t->d);
    if (*nz == 0) {
        int seen[ND_MAX_Z + 1] = {0};
        for (long s = 0; s < n; s++) {
            nd_dataset_entry e;
            nd_dataset_get(t->d, s, &e);
            for (int i = 0; i < e.natoms; i++)
                if (e.z[i] >= 1 && e.z[i] <= ND_MAX_Z && !seen[e.z[i]]) {
                    if (*nz == ND_MODEL_SPEC_MAX_ELEMENTS) {
                        where(t, s, at, sizeof at);
                        return nd_fail(err, ND_EINPUT,
                                       "%s: more than %d elements in the dataset", at,
                                       ND_MODEL_SPEC_MAX_ELEMENTS);
                    }
                    seen[e.z[i]] = 1;
                    z[(*nz)++] = e.z[i];
                }
        }
    }
    int ok[ND_MAX_Z + 1] = {0};
    char list[200] = "";
    for (int q = 0; q < *nz; q++) {
        if (z[q] < 1 || z[q] > ND_MAX_Z)
            return nd_fail(err, ND_EINPUT, "train: atomic number %d is not an element", z[q]);
        ok[z[q]] = 1;
        size_t L = strlen(list);
        snprintf(list + L, sizeof list - L, "%s%s", q ? ", " : "", nd_element_symbol(z[q]));
    }
    for (long s = 0; s < n; s++) {
        nd_dataset_entry e;
        nd_dataset_get(t->d, s, &e);
        if (e.natoms < 1) {
            where(t, s, at, sizeof at);
            return nd_fail(err, ND_EINPUT, "%s: a structure without atoms", at);
        }
        for (int i = 0; i < e.natoms; i++)
            if (e.z[i] < 1 || e.z[i] > ND_MAX_Z || !ok[e.z[i]]) {
                where(t, s, at, sizeof at);
                return nd_fail(err, ND_EINPUT,
                               "%s: atom %d is %s, which is not in the requested elements (%s)",
                               at, i + 1,
                               e.z[i] >= 1 && e.z[i] <= ND_MAX_Z ? nd_element_symbol(e.z[i]) : "?",
                               list);
            }
        if (t->cfg.neutral_only && e.charge != 0) {
            where(t, s, at, sizeof at);
            return nd_fail(err, ND_EINPUT,
                           "%s: total charge %d, but the model is for neutral molecules", at,
                           e.charge);
        }
        int bad = !isfinite(e.energy);
        for (int c = 0; c < 3 * e.natoms && !bad; c++)
            bad = !isfinite(e.xyz[c]) || (e.forces && !isfinite(e.forces[c]));
        if (bad) {
            where(t, s, at, sizeof at);
            return nd_fail(err, ND_EINPUT, "%s: a number is not finite", at);
        }
    }
    return ND_OK;
}

/* Splits the molecules (seeded shuffle of the keys). */
static int split(nd_train *t, nd_error *err)
{
    const nd_dataset *d = t->d;
    long n = nd_dataset_count(d);
    int nk = nd_dataset_key_count(d);
    int *perm = malloc((size_t)(nk > 0 ? nk : 1) * sizeof(int));
    unsigned char *isval = calloc((size_t)(nk > 0 ? nk : 1), 1);
    t->train_idx = malloc((size_t)(n > 0 ? n : 1) * sizeof(long));
    t->val_idx = malloc((size_t)(n > 0 ? n : 1) * sizeof(long));
    t->order = malloc((size_t)(n > 0 ? n : 1) * sizeof(long));
    if (!perm || !isval || !t->train_idx || !t->val_idx || !t->order) {
        free(perm);
        free(isval);
        return nd_fail(err, ND_ENOMEM, "train: out of memory");
    }
    for (int q = 0; q < nk; q++)
        perm[q] = q;
    nd_rng r;
    nd_rng_stream(&r, t->cfg.seed, UINT64_C(0x73706c6974)); /* "split" */
    for (int q = nk - 1; q > 0; q--) {
        int j = (int)nd_rng_below(&r, (uint64_t)q + 1);
        int tmp = perm[q];
        perm[q] = perm[j];
        perm[j] = tmp;
    }
    int nv = (int)floor(t->cfg.validation_fraction * nk + 0.5);
    if (t->cfg.validation_fraction > 0 && nv == 0 && nk >= 2)
        nv = 1;
    if (nv >= nk)
        nv = nk - 1;
    if (nv < 0)
        nv = 0;
    for (int q = 0; q < nv; q++)
        isval[perm[q]] = 1;
    t->always_matched = 0;
    for (int q = 0; q < nk; q++) {
        const char *key = nd_dataset_key_name(d, q);
        for (int a = 0; a < t->cfg.always_train_count; a++)
            if (key && t->cfg.always_train[a] && strcmp(key, t->cfg.always_train[a]) == 0) {
                t->always_matched++;
                if (isval[q]) {
                    isval[q] = 0;
                    nv--;
                }
                break;
            }
    }
    t->nval_mol = nv;
    t->ntrain_mol = nk - nv;
    for (long s = 0; s < n; s++) {
        if (isval[nd_dataset_key_index(d, s)])
            t->val_idx[t->nval++] = s;
        else
            t->train_idx[t->ntrain++] = s;
    }
    free(perm);
    free(isval);
    if (t->ntrain == 0)
        return nd_fail(err, ND_EINPUT, "%s: no structures to train on",
                       t->name ? t->name : "dataset");
    /* per validation structure: atom offset and the molecule's lowest one */
    t->val_off = malloc((size_t)(t->nval + 1) * sizeof(long));
    t->val_low = malloc((size_t)(t->nval + 1) * sizeof(long));
    long *low_of_key = malloc((size_t)(nk > 0 ? nk : 1) * sizeof(long));
    if (!t->val_off || !t->val_low || !low_of_key) {
        free(low_of_key);
        return nd_fail(err, ND_ENOMEM, "train: out of memory");
    }
    for (int q = 0; q < nk; q++)
        low_of_key[q] = -1;
    long off = 0;
    for (long j = 0; j < t->nval; j++) {
        nd_dataset_entry e, l;
        nd_dataset_get(d, t->val_idx[j], &e);
        t->val_off[j] = off;
        off += 3 * e.natoms;
        int key = nd_dataset_key_index(d, t->val_idx[j]);
        if (low_of_key[key] < 0)
            low_of_key[key] = j;
        else {
            nd_dataset_get(d, t->val_idx[low_of_key[key]], &l);
            if (e.energy < l.energy)
                low_of_key[key] = j;
        }
    }
    t->nval_atoms = off / 3;
    for (long j = 0; j < t->nval; j++)
        t->val_low[j] = low_of_key[nd_dataset_key_index(d, t->val_idx[j])];
    free(low_of_key);
    return ND_OK;
}

/* The molecule offsets of predictions pe of structures idx[0..n): per
 * molecule key, molecule_offset times the mean of pe - E^ref over its
 * structures among them, weighted like the loss (w_s / n_s). Returns an
 * array of one per key (the caller frees it), or NULL if out of memory. */
static double *key_offsets(const nd_train *t, const long *idx, long n, const double *pe)
{
    int nk = nd_dataset_key_count(t->d);
    double *num = calloc((size_t)(nk > 0 ? nk : 1), sizeof(double));
    double *den = calloc((size_t)(nk > 0 ? nk : 1), sizeof(double));
    if (!num || !den) {
        free(num);
        free(den);
        return NULL;
    }
    for (long j = 0; j < n; j++) {
        nd_dataset_entry e;
        nd_dataset_get(t->d, idx[j], &e);
        double w = (t->sw ? t->sw[idx[j]] : 1.0) / e.natoms;
        int key = nd_dataset_key_index(t->d, idx[j]);
        num[key] += w * (pe[j] - e.energy);
        den[key] += w;
    }
    for (int q = 0; q < nk; q++)
        num[q] = den[q] > 0 ? t->cfg.molecule_offset * num[q] / den[q] : 0;
    free(den);
    return num;
}

/* Validation errors of predictions pe (nval) and pf (3 nval_atoms). With a
 * molecule offset, the loss (not the mean errors) takes each validation
 * molecule's offset from these predictions, as the training loss does. */
static void valid_errors(const nd_train *t, const double *pe, const double *pf, nd_train_errors *v)
{
    double ea = 0, es = 0, fa = 0, fs = 0, ra = 0, loss = 0;
    long nf = 0, nr = 0;
    double *koff = t->cfg.molecule_offset > 0 ? key_offsets(t, t->val_idx, t->nval, pe) : NULL;
    for (long j = 0; j < t->nval; j++) {
        nd_dataset_entry e;
        nd_dataset_get(t->d, t->val_idx[j], &e);
        double dE = pe[j] - e.energy;
        ea += fabs(dE);
        es += dE * dE;
        double dl = koff ? dE - koff[nd_dataset_key_index(t->d, t->val_idx[j])] : dE;
        loss += (t->sw ? t->sw[t->val_idx[j]] : 1.0) * dl * dl / e.natoms;
        if (e.forces)
            for (int c = 0; c < 3 * e.natoms; c++) {
                double r = pf[t->val_off[j] + c] - e.forces[c];
                fa += fabs(r);
                fs += r * r;
                nf++;
            }
        long lo = t->val_low[j];
        if (lo != j) {
            nd_dataset_entry l;
            nd_dataset_get(t->d, t->val_idx[lo], &l);
            if (t->cfg.energy_window > 0 && e.energy - l.energy > t->cfg.energy_window)
                continue;
            ra += fabs((pe[j] - pe[lo]) - (e.energy - l.energy));
            nr++;
        }
    }
    double n = (double)t->nval;
    v->energy_mae = t->nval ? ea / n : NOVAL;
    v->energy_rmse = t->nval ? sqrt(es / n) : NOVAL;
    v->force_mae = nf ? fa / (double)nf : NOVAL;
    v->force_rmse = nf ? sqrt(fs / (double)nf) : NOVAL;
    v->relative_mae = nr ? ra / (double)nr : NOVAL;
    v->loss = t->nval ? loss / n + (nf ? t->cfg.force_weight * fs / (double)nf : 0) : NOVAL;
    free(koff);
}

/* Predicts the validation set with member k into val_e/val_f; its errors
 * into *v. */
static int validate_member(nd_train *t, int k, nd_train_errors *v, nd_error *err)
{
    if (t->nval == 0) {
        v->loss = v->energy_mae = v->energy_rmse = v->force_mae = v->force_rmse =
            v->relative_mae = NOVAL;
        return ND_OK;
    }
    job jb = {0};
    jb.m = t->model;
    jb.k = k;
    jb.d = t->d;
    jb.want_forces = 1;
    jb.pred_e = t->val_e + (size_t)k * t->nval;
    jb.pred_f = t->val_f + (size_t)k * 3 * t->nval_atoms;
    jb.pred_off = t->val_off;
    sums tot;
    int s = runner_run(&t->run, &jb, t->val_idx, t->nval, EVAL_CHUNK, &tot, err);
    if (s)
        return s;
    valid_errors(t, jb.pred_e, jb.pred_f, v);
    return ND_OK;
}

/* A warm start's shape: the start model's elements, descriptor, layers,
 * members and charge rule, into the settings (so the provenance and the
 * checkpoint fingerprint describe what is trained) and the model spec. */
static void take_start_shape(nd_train_config *c, nd_model_spec *spec)
{
    const nd_model *st = c->start;
    c->nelements = spec->nelements = st->nel;
    for (int e = 0; e < st->nel; e++)
        c->z[e] = spec->z[e] = st->z[e];
    c->descriptor = st->desc;
    c->nhidden = st->nhidden;
    for (int l = 0; l < st->nhidden; l++)
        c->hidden[l] = st->width[l + 1];
    c->members = st->nmembers;
    c->neutral_only = st->neutral_only;
}

int nd_train_new(nd_train **out, const nd_dataset *data, const char *data_name,
                 const nd_train_config *cfg, nd_error *err)
{
    *out = NULL;
    if (!data || !cfg)
        return nd_fail(err, ND_EINVAL, "train: no dataset or settings");
    int s = check_config(cfg, err);
    if (s)
        return s;
    nd_train *t = calloc(1, sizeof *t);
    if (!t)
        return nd_fail(err, ND_ENOMEM, "train: out of memory");
    t->d = data;
    t->cfg = *cfg;
    t->name = strdup(data_name ? data_name : "dataset");
    if (!t->name || runner_init(&t->run)) {
        nd_train_free(t);
        return nd_fail(err, ND_ENOMEM, "train: out of memory");
    }
    nd_model_spec spec;
    nd_model_spec_defaults(&spec);
    spec.nelements = cfg->nelements;
    memcpy(spec.z, cfg->z, sizeof spec.z);
    if (cfg->start)
        take_start_shape(&t->cfg, &spec);
    if ((s = check_data(t, spec.z, &spec.nelements, err)))
        goto fail;
    t->cfg.nelements = spec.nelements;
    memcpy(t->cfg.z, spec.z, sizeof spec.z);
    if (nd_dataset_count(data) == 0) {
        s = nd_fail(err, ND_EINPUT, "%s: the dataset has no structures", t->name);
        goto fail;
    }
    if (cfg->start) {
        /* the start model's offsets and scaling stay: its weights were
         * learned with them */
        if (cfg->descriptor_given && !nd_descriptor_equal(&cfg->descriptor, &cfg->start->desc)) {
            /* widened: the new features are scaled on the training atoms */
            if ((s = nd_descriptor_check(&cfg->descriptor, err)))
                goto fail;
            int dn = nd_descriptor_size(&cfg->descriptor, spec.nelements);
            unsigned char *is_new = malloc((size_t)dn);
            if (!is_new) {
                s = nd_fail(err, ND_ENOMEM, "train: out of memory");
                goto fail;
            }
            s = nd_model_widen(&t->model, cfg->start, &cfg->descriptor, is_new, err);
            if (s == ND_EINPUT) /* say which model could not be widened */
                nd_error_prefix(err, "cannot widen %.200s",
                                cfg->start_name ? cfg->start_name : "the start model");
            if (s == ND_OK && (s = split(t, err)) == ND_OK)
                s = fit_scaling(t, is_new, err);
            free(is_new);
            if (s)
                goto fail;
            t->widened_from = cfg->start->D;
            t->cfg.descriptor = cfg->descriptor;
        } else if ((s = nd_model_copy(&t->model, cfg->start, err)) || (s = split(t, err)))
            goto fail;
        t->start_name = strdup(cfg->start_name ? cfg->start_name : "a model");
        t->cfg.start = NULL;
        t->cfg.start_name = NULL;
        if (!t->start_name) {
            s = nd_fail(err, ND_ENOMEM, "train: out of memory");
            goto fail;
        }
    } else {
        spec.descriptor = cfg->descriptor;
        spec.nhidden = cfg->nhidden;
        memcpy(spec.hidden, cfg->hidden, sizeof spec.hidden);
        spec.members = cfg->members;
        spec.neutral_only = cfg->neutral_only;
        if ((s = nd_model_new(&t->model, &spec, cfg->seed, err)))
            goto fail;
        if ((s = split(t, err)) || (s = fit_offsets(t, err)) || (s = fit_scaling(t, NULL, err)))
            goto fail;
    }
    t->cfg.always_train = NULL; /* the caller's strings: used by split() only */
    t->cfg.always_train_count = 0;
    if (t->cfg.energy_window > 0) {
        long n = nd_dataset_count(data);
        unsigned char *mask = calloc((size_t)n, 1);
        t->sw = malloc((size_t)n * sizeof(double));
        if (mask && t->sw)
            for (long q = 0; q < t->ntrain; q++)
                mask[t->train_idx[q]] = 1;
        int bad = !mask || !t->sw || nd_train_energy_weights(data, t->cfg.energy_window, mask, t->sw);
        free(mask);
        if (bad) {
            s = nd_fail(err, ND_ENOMEM, "train: out of memory");
            goto fail;
        }
    }
    if (t->cfg.molecule_offset > 0) {
        t->eoff = calloc((size_t)nd_dataset_count(data), sizeof(double));
        t->pred_tr = malloc((size_t)t->ntrain * sizeof(double));
        if (!t->eoff || !t->pred_tr) {
            s = nd_fail(err, ND_ENOMEM, "train: out of memory");
            goto fail;
        }
    }
    t->K = t->cfg.members;
    t->P = nd_train_member_doubles(t->model);
    size_t KP = (size_t)t->K * t->P;
    t->theta = malloc(KP * sizeof(double));
    t->best = malloc(KP * sizeof(double));
    t->am = calloc(KP, sizeof(double));
    t->av = calloc(KP, sizeof(double));
    t->grad = malloc(t->P * sizeof(double));
    t->mem = calloc((size_t)t->K, sizeof(member));
    t->val_e = calloc((size_t)t->K * (size_t)(t->nval + 1), sizeof(double));
    t->val_f = calloc((size_t)t->K * (size_t)(3 * t->nval_atoms + 1), sizeof(double));
    t->mean_f = calloc((size_t)(3 * t->nval_atoms + 1), sizeof(double));
    if (!t->theta || !t->best || !t->am || !t->av || !t->grad || !t->mem || !t->val_e ||
        !t->val_f || !t->mean_f) {
        s = nd_fail(err, ND_ENOMEM, "train: out of memory for %zu parameters", KP);
        goto fail;
    }
    for (int k = 0; k < t->K; k++) {
        nd_train_member_get(t->model, k, t->theta + (size_t)k * t->P);
        memcpy(t->best + (size_t)k * t->P, t->theta + (size_t)k * t->P, t->P * sizeof(double));
        member *mk = &t->mem[k];
        mk->lr = cfg->learning_rate;
        mk->best_crit = mk->best_loss = INFINITY;
        mk->active = 1;
    }
    t->fingerprint = fingerprint(t);
    t->last_valid.loss = t->last_valid.energy_mae = t->last_valid.energy_rmse = NOVAL;
    t->last_valid.force_mae = t->last_valid.force_rmse = t->last_valid.relative_mae = NOVAL;
    *out = t;
    return ND_OK;
fail:
    nd_train_free(t);
    return s;
}

/* One Adam step of member k with gradient g (weight decay added here). */
static void adam_step(nd_train *t, int k, const double *g)
{
    const double b1 = 0.9, b2 = 0.999, eps = 1e-8, wd = t->cfg.weight_decay;
    member *mk = &t->mem[k];
    mk->steps += 1;
    double c1 = 1 - pow(b1, mk->steps), c2 = 1 - pow(b2, mk->steps);
    double *th = t->theta + (size_t)k * t->P, *m = t->am + (size_t)k * t->P,
           *v = t->av + (size_t)k * t->P;
    const double lr = mk->lr;
    for (size_t q = 0; q < t->P; q++) {
        double gq = g[q] + wd * th[q];
        m[q] = b1 * m[q] + (1 - b1) * gq;
        v[q] = b2 * v[q] + (1 - b2) * gq * gq;
        th[q] -= lr * (m[q] / c1) / (sqrt(v[q] / c2) + eps);
    }
    nd_train_member_set(t->model, k, th);
}

/* The molecule offsets of member k for its next epoch (molecule_offset
 * A > 0): its energies of the training structures, then per molecule the
 * mean error, weighted like the loss, times A, into eoff of each of the
 * molecule's structures. The loss then fits e - A mean(e) per molecule: at
 * A = 1 only energies relative within a molecule, which are what ranking
 * conformers needs, and the molecule's absolute level is left free (it is
 * a constant the networks would otherwise spend their fit on, and it does
 * not carry over to new molecules); below 1 the level keeps weight
 * (1 - A)^2. Held for the epoch: the weighted mean is where the loss is
 * flat in the offset, so the gradient is right at its start. */
static int molecule_offsets(nd_train *t, int k, nd_error *err)
{
    job jb = {0};
    jb.m = t->model;
    jb.k = k;
    jb.d = t->d;
    jb.pred_e = t->pred_tr;
    sums tot;
    int s = runner_run(&t->run, &jb, t->train_idx, t->ntrain, EVAL_CHUNK, &tot, err);
    if (s)
        return s;
    double *koff = key_offsets(t, t->train_idx, t->ntrain, t->pred_tr);
    if (!koff)
        return nd_fail(err, ND_ENOMEM, "train: out of memory");
    for (long q = 0; q < t->ntrain; q++)
        t->eoff[t->train_idx[q]] = koff[nd_dataset_key_index(t->d, t->train_idx[q])];
    free(koff);
    return ND_OK;
}

/* One pass of member k over the training set in its own order; training
 * figures into *tr. */
static int member_epoch(nd_train *t, int k, nd_train_errors *tr, nd_error *err)
{
    if (t->cfg.molecule_offset > 0) {
        int s = molecule_offsets(t, k, err);
        if (s)
            return s;
    }
    nd_rng r;
    nd_rng_stream(&r, t->cfg.seed ^ UINT64_C(0x6f72646572),
                  ((uint64_t)(k + 1) << 32) | (uint64_t)t->epoch);
    memcpy(t->order, t->train_idx, (size_t)t->ntrain * sizeof(long));
    for (long q = t->ntrain - 1; q > 0; q--) {
        long j = (long)nd_rng_below(&r, (uint64_t)q + 1);
        long tmp = t->order[q];
        t->order[q] = t->order[j];
        t->order[j] = tmp;
    }
    sums acc = {0};
    long nb = 0;
    for (long b0 = 0; b0 < t->ntrain; b0 += t->cfg.batch) {
        long n = t->ntrain - b0 < t->cfg.batch ? t->ntrain - b0 : t->cfg.batch;
        const long *idx = t->order + b0;
        long C = 0;
        for (long s = 0; s < n; s++) {
            nd_dataset_entry e;
            nd_dataset_get(t->d, idx[s], &e);
            if (e.forces)
                C += 3 * e.natoms;
        }
        job jb = {0};
        jb.m = t->model;
        jb.k = k;
        jb.d = t->d;
        jb.wt.ce = 1.0 / (double)n;
        jb.wt.cf = C > 0 ? t->cfg.force_weight / (double)C : 0;
        jb.sw = t->sw;
        jb.eoff = t->eoff;
        jb.want_forces = t->cfg.force_weight > 0;
        jb.grad = t->grad;
        sums tot;
        int s = runner_run(&t->run, &jb, idx, n, CHUNK, &tot, err);
        if (s)
            return s;
        adam_step(t, k, t->grad);
        acc.loss += tot.loss;
        acc.e_abs += tot.e_abs;
        acc.e_sq += tot.e_sq;
        acc.f_abs += tot.f_abs;
        acc.f_sq += tot.f_sq;
        acc.ne += tot.ne;
        acc.nf += tot.nf;
        nb++;
    }
    tr->loss = nb ? acc.loss / (double)nb : NOVAL;
    tr->energy_mae = acc.ne ? acc.e_abs / (double)acc.ne : NOVAL;
    tr->energy_rmse = acc.ne ? sqrt(acc.e_sq / (double)acc.ne) : NOVAL;
    tr->force_mae = acc.nf ? acc.f_abs / (double)acc.nf : NOVAL;
    tr->force_rmse = acc.nf ? sqrt(acc.f_sq / (double)acc.nf) : NOVAL;
    tr->relative_mae = NOVAL;
    return ND_OK;
}

/* Ends member k: its best weights become the current ones. */
static void member_stop(nd_train *t, int k)
{
    t->mem[k].active = 0;
    memcpy(t->theta + (size_t)k * t->P, t->best + (size_t)k * t->P, t->P * sizeof(double));
    nd_train_member_set(t->model, k, t->theta + (size_t)k * t->P);
}

/* Ensemble mean of the cached validation predictions; errors into *v. */
static void ensemble_valid(nd_train *t, nd_train_errors *v)
{
    if (t->nval == 0) {
        *v = t->last_valid;
        return;
    }
    double *pe = malloc((size_t)t->nval * sizeof(double));
    if (!pe) {
        *v = t->last_valid;
        return;
    }
    size_t nf = 3 * (size_t)t->nval_atoms;
    for (long j = 0; j < t->nval; j++) {
        double sum = 0;
        for (int k = 0; k < t->K; k++)
            sum += t->val_e[(size_t)k * t->nval + j];
        pe[j] = sum / t->K;
    }
    for (size_t c = 0; c < nf; c++) {
        double sum = 0;
        for (int k = 0; k < t->K; k++)
            sum += t->val_f[(size_t)k * nf + c];
        t->mean_f[c] = sum / t->K;
    }
    valid_errors(t, pe, t->mean_f, v);
    free(pe);
}

/* 1 when no member trains any more or the epoch limit is reached. */
static int finished(const nd_train *t)
{
    if (t->epoch >= t->cfg.epochs)
        return 1;
    for (int k = 0; k < t->K; k++)
        if (t->mem[k].active)
            return 0;
    return 1;
}

int nd_train_epoch(nd_train *t, nd_train_epoch_report *rep, nd_error *err)
{
    if (rep)
        memset(rep, 0, sizeof *rep);
    if (finished(t))
        return ND_OK;
    nd_train_errors tr_sum = {0};
    int ntr = 0;
    for (int k = 0; k < t->K; k++) {
        member *mk = &t->mem[k];
        if (!mk->active)
            continue;
        nd_train_errors tr, va;
        int s = member_epoch(t, k, &tr, err);
        if (s == ND_OK)
            s = validate_member(t, k, &va, err);
        if (s)
            return s;
        tr_sum.loss += tr.loss;
        tr_sum.energy_mae += tr.energy_mae;
        tr_sum.energy_rmse += tr.energy_rmse;
        tr_sum.force_mae += tr.force_mae;
        tr_sum.force_rmse += tr.force_rmse;
        ntr++;
        /* criterion: validation relative-energy error, else validation loss,
         * else (no validation set) the training loss */
        double loss = t->nval ? va.loss : tr.loss;
        double crit = isfinite(va.relative_mae) ? va.relative_mae : loss;
        if (crit < mk->best_crit) {
            mk->best_crit = crit;
            mk->since_crit = 0;
            mk->best_epoch = t->epoch + 1;
            memcpy(t->best + (size_t)k * t->P, t->theta + (size_t)k * t->P,
                   t->P * sizeof(double));
        } else
            mk->since_crit += 1;
        int floor_plateau = 0;
        if (loss < mk->best_loss) {
            mk->best_loss = loss;
            mk->since_loss = 0;
        } else if ((mk->since_loss += 1) >= t->cfg.lr_patience) {
            if (mk->lr <= t->cfg.min_learning_rate)
                floor_plateau = 1;
            mk->lr = nd_larger(mk->lr * 0.5, t->cfg.min_learning_rate);
            mk->since_loss = 0;
        }
        if (mk->since_crit >= t->cfg.stop_patience || floor_plateau || !isfinite(loss))
            member_stop(t, k);
    }
    t->epoch++;
    nd_train_errors va;
    ensemble_valid(t, &va);
    t->last_valid = va;
    int active = 0;
    double lr = 0;
    for (int k = 0; k < t->K; k++)
        if (t->mem[k].active) {
            active++;
            if (t->mem[k].lr > lr)
                lr = t->mem[k].lr;
        }
    if (rep) {
        rep->epoch = t->epoch;
        rep->max_epochs = t->cfg.epochs;
        double n = ntr > 0 ? ntr : 1;
        rep->train.loss = tr_sum.loss / n;
        rep->train.energy_mae = tr_sum.energy_mae / n;
        rep->train.energy_rmse = tr_sum.energy_rmse / n;
        rep->train.force_mae = tr_sum.force_mae / n;
        rep->train.force_rmse = tr_sum.force_rmse / n;
        rep->train.relative_mae = NOVAL;
        rep->valid = va;
        rep->learning_rate = lr;
        rep->members_training = active;
    }
    /* reaching the epoch limit changes nothing in the state, so a resumed
     * run with a larger limit continues exactly as an uninterrupted one */
    return finished(t) ? ND_OK : ND_CONTINUE;
}

int nd_train_epochs_done(const nd_train *t) { return t->epoch; }

void nd_train_set_epochs(nd_train *t, int epochs) { t->cfg.epochs = epochs; }

void nd_train_set_elapsed(nd_train *t, double seconds) { t->elapsed = seconds; }
double nd_train_elapsed(const nd_train *t) { return t->elapsed; }
nd_model *nd_train_current(nd_train *t) { return t->model; }

void nd_train_split(const nd_train *t, nd_train_split_info *info)
{
    info->train_structures = t->ntrain;
    info->valid_structures = t->nval;
    info->train_molecules = t->ntrain_mol;
    info->valid_molecules = t->nval_mol;
    info->always_train_matched = t->always_matched;
}

const long *nd_train_training_set(const nd_train *t, long *n)
{
    *n = t->ntrain;
    return t->train_idx;
}

const long *nd_train_validation_set(const nd_train *t, long *n)
{
    *n = t->nval;
    return t->val_idx;
}

/* ------------------------------------------------------------ state file */

/* Writes n doubles little-endian (the machines we build for are
 * little-endian; a big-endian host swaps). */
static int put_doubles(FILE *f, const double *v, size_t n, uint64_t *h)
{
    for (size_t i = 0; i < n; i++) {
        uint64_t u;
        memcpy(&u, &v[i], 8);
        unsigned char b[8];
        for (int q = 0; q < 8; q++)
            b[q] = (unsigned char)(u >> (8 * q));
        *h = nd_model_fnv1a64(*h, b, 8);
        if (fwrite(b, 1, 8, f) != 8)
            return -1;
    }
    return 0;
}

static int get_doubles(const unsigned char **p, const unsigned char *end, double *v, size_t n)
{
    if ((size_t)(end - *p) < 8 * n)
        return -1;
    for (size_t i = 0; i < n; i++) {
        uint64_t u = 0;
        for (int q = 0; q < 8; q++)
            u |= (uint64_t)(*p)[q] << (8 * q);
        memcpy(&v[i], &u, 8);
        *p += 8;
    }
    return 0;
}

/* The JSON line of the state: identification and readable settings. */
static char *state_header(const nd_train *t)
{
    cJSON *o = cJSON_CreateObject();
    if (!o)
        return NULL;
    char fp[17];
    snprintf(fp, sizeof fp, "%016llx", (unsigned long long)t->fingerprint);
    cJSON_AddStringToObject(o, "kind", "training state");
    cJSON_AddStringToObject(o, "fingerprint", fp);
    cJSON_AddStringToObject(o, "dataset", t->name);
    cJSON_AddNumberToObject(o, "epoch", t->epoch);
    cJSON_AddNumberToObject(o, "members", t->K);
    cJSON_AddNumberToObject(o, "parameters_per_member", (double)t->P);
    cJSON_AddNumberToObject(o, "seed", (double)t->cfg.seed);
    cJSON_AddNumberToObject(o, "batch", t->cfg.batch);
    cJSON_AddNumberToObject(o, "force_weight", t->cfg.force_weight);
    if (t->cfg.energy_window > 0)
        cJSON_AddNumberToObject(o, "energy_window", t->cfg.energy_window);
    if (t->cfg.molecule_offset > 0)
        cJSON_AddNumberToObject(o, "molecule_offset", t->cfg.molecule_offset);
    char *s = cJSON_PrintUnformatted(o);
    cJSON_Delete(o);
    return s;
}

int nd_train_save_state(const nd_train *t, const char *path, nd_error *err)
{
    size_t L = strlen(path);
    char *tmp = malloc(L + 16);
    char *hdr = state_header(t);
    if (!tmp || !hdr) {
        free(tmp);
        free(hdr);
        return nd_fail(err, ND_ENOMEM, "train: out of memory");
    }
    snprintf(tmp, L + 16, "%s.tmpXXXXXX", path);
    int fd = mkstemp(tmp);
    FILE *f = fd >= 0 ? fdopen(fd, "wb") : NULL;
    if (!f) {
        if (fd >= 0)
            close(fd);
        int e = errno;
        free(hdr);
        nd_fail(err, ND_EIO, "%s: cannot write the training state: %s", path, strerror(e));
        free(tmp);
        return ND_EIO;
    }
    uint64_t h = ND_FNV1A64_INIT;
    int bad = 0;
    h = nd_model_fnv1a64(h, STATE_MAGIC, strlen(STATE_MAGIC));
    bad |= fputs(STATE_MAGIC, f) < 0;
    h = nd_model_fnv1a64(h, hdr, strlen(hdr));
    h = nd_model_fnv1a64(h, "\n", 1);
    bad |= fputs(hdr, f) < 0 || fputc('\n', f) < 0;
    double head[3] = {(double)t->epoch, t->elapsed, 0};
    bad |= put_doubles(f, head, 3, &h);
    for (int k = 0; k < t->K && !bad; k++) {
        const member *mk = &t->mem[k];
        double sc[MEMBER_SCALARS] = {mk->lr,         mk->steps,      mk->best_crit, mk->best_loss,
                                     mk->since_crit, mk->since_loss, mk->active,    mk->best_epoch};
        size_t o = (size_t)k * t->P;
        bad |= put_doubles(f, sc, MEMBER_SCALARS, &h) || put_doubles(f, t->theta + o, t->P, &h) ||
               put_doubles(f, t->best + o, t->P, &h) || put_doubles(f, t->am + o, t->P, &h) ||
               put_doubles(f, t->av + o, t->P, &h);
    }
    bad |= fprintf(f, "\nchecksum fnv1a64 %016llx\n", (unsigned long long)h) < 0;
    bad |= fflush(f) != 0 || fsync(fileno(f)) != 0;
    bad |= fclose(f) != 0;
    free(hdr);
    if (bad || rename(tmp, path) != 0) {
        int e = errno;
        unlink(tmp);
        free(tmp);
        return nd_fail(err, ND_EIO, "%s: cannot write the training state: %s", path, strerror(e));
    }
    free(tmp);
    return ND_OK;
}

int nd_train_load_state(nd_train *t, const char *path, nd_error *err)
{
    unsigned char *buf;
    size_t len;
    int rs = nd_read_file(path, "training state", 0, &buf, &len, err);
    if (rs)
        return rs;
    int s = ND_EINPUT;
    const char *why = "not a nadir training state";
    size_t ml = strlen(STATE_MAGIC);
    const size_t tail = strlen("\nchecksum fnv1a64 0000000000000000\n");
    cJSON *hdr = NULL;
    if (len < ml + tail || memcmp(buf, STATE_MAGIC, ml) != 0)
        goto out;
    unsigned char *nl = memchr(buf + ml, '\n', len - ml);
    if (!nl)
        goto out;
    const unsigned char *end = buf + len - tail;
    char sum[17];
    if (memcmp(end, "\nchecksum fnv1a64 ", 18) != 0) {
        why = "its checksum line is missing (truncated file?)";
        goto out;
    }
    memcpy(sum, end + 18, 16);
    sum[16] = 0;
    uint64_t h = nd_model_fnv1a64(ND_FNV1A64_INIT, buf, (size_t)(end - buf));
    if (strtoull(sum, NULL, 16) != h) {
        why = "checksum mismatch (damaged file)";
        goto out;
    }
    *nl = 0;
    hdr = cJSON_Parse((const char *)buf + ml);
    const cJSON *fp = cJSON_GetObjectItemCaseSensitive(hdr, "fingerprint");
    char mine[17];
    snprintf(mine, sizeof mine, "%016llx", (unsigned long long)t->fingerprint);
    if (!cJSON_IsString(fp)) {
        why = "its header is damaged";
        goto out;
    }
    if (strcmp(fp->valuestring, mine) != 0) {
        why = "it was made from another dataset or other settings (members, layers, "
              "descriptor, batch, weights, fraction, seed, rates, elements must all be the same)";
        goto out;
    }
    const unsigned char *p = nl + 1;
    double head[3];
    size_t need = 3 + (size_t)t->K * (MEMBER_SCALARS + 4 * t->P);
    if ((size_t)(end - p) != 8 * need) {
        why = "its size does not match the model";
        goto out;
    }
    get_doubles(&p, end, head, 3);
    t->epoch = (int)head[0];
    t->elapsed = head[1];
    for (int k = 0; k < t->K; k++) {
        double sc[MEMBER_SCALARS];
        size_t o = (size_t)k * t->P;
        get_doubles(&p, end, sc, MEMBER_SCALARS);
        member *mk = &t->mem[k];
        mk->lr = sc[0];
        mk->steps = sc[1];
        mk->best_crit = sc[2];
        mk->best_loss = sc[3];
        mk->since_crit = sc[4];
        mk->since_loss = sc[5];
        mk->active = sc[6];
        mk->best_epoch = sc[7];
        get_doubles(&p, end, t->theta + o, t->P);
        get_doubles(&p, end, t->best + o, t->P);
        get_doubles(&p, end, t->am + o, t->P);
        get_doubles(&p, end, t->av + o, t->P);
        nd_train_member_set(t->model, k, t->theta + o);
    }
    /* the cached validation predictions of every member */
    s = ND_OK;
    for (int k = 0; k < t->K && s == ND_OK; k++) {
        nd_train_errors va;
        s = validate_member(t, k, &va, err);
    }
    if (s == ND_OK)
        ensemble_valid(t, &t->last_valid);
    cJSON_Delete(hdr);
    free(buf);
    return s;
out:
    cJSON_Delete(hdr);
    free(buf);
    return nd_fail(err, s, "%s: cannot resume: %s", path, why);
}

/* ------------------------------------------------------------ the model */

/* Adds a number, or null when it is not finite. */
static void add_num(cJSON *o, const char *name, double v)
{
    if (isfinite(v))
        cJSON_AddNumberToObject(o, name, v);
    else
        cJSON_AddNullToObject(o, name);
}

int nd_train_model(const nd_train *t, nd_model **out, nd_error *err)
{
    *out = NULL;
    nd_model *m;
    int s = nd_model_copy(&m, t->model, err);
    if (s)
        return s;
    for (int k = 0; k < t->K; k++)
        nd_train_member_set(m, k, t->best + (size_t)k * t->P);
    cJSON *o = cJSON_CreateObject(), *sp, *va, *tr, *un;
    if (!o) {
        nd_model_free(m);
        return nd_fail(err, ND_ENOMEM, "train: out of memory");
    }
    const char *base = strrchr(t->name, '/');
    cJSON_AddStringToObject(o, "origin", "nadir train");
    cJSON_AddStringToObject(o, "dataset", base ? base + 1 : t->name);
    cJSON_AddNumberToObject(o, "dataset_structures", (double)nd_dataset_count(t->d));
    cJSON_AddNumberToObject(o, "dataset_molecules", nd_dataset_key_count(t->d));
    cJSON_AddNumberToObject(o, "dataset_atoms", (double)nd_dataset_atoms(t->d));
    un = cJSON_AddObjectToObject(o, "units");
    cJSON_AddStringToObject(un, "energy", "kcal/mol");
    cJSON_AddStringToObject(un, "length", "angstrom");
    cJSON_AddStringToObject(un, "force", "kcal/mol/angstrom");
    /* the sizes trained on, so that users of the model can be told when a
     * molecule is bigger than any it learned from */
    int max_atoms = 0, max_heavy = 0;
    for (long i = 0; i < t->ntrain; i++) {
        nd_dataset_entry e;
        nd_dataset_get(t->d, t->train_idx[i], &e);
        int heavy = 0;
        for (int a = 0; a < e.natoms; a++)
            heavy += e.z[a] > 1;
        max_atoms = e.natoms > max_atoms ? e.natoms : max_atoms;
        max_heavy = heavy > max_heavy ? heavy : max_heavy;
    }
    cJSON *dom = cJSON_AddObjectToObject(o, "training_sizes");
    cJSON_AddNumberToObject(dom, "atoms_max", max_atoms);
    cJSON_AddNumberToObject(dom, "heavy_atoms_max", max_heavy);
    sp = cJSON_AddObjectToObject(o, "split");
    cJSON_AddStringToObject(sp, "by", "molecule key");
    cJSON_AddNumberToObject(sp, "seed", (double)t->cfg.seed);
    cJSON_AddNumberToObject(sp, "training_structures", (double)t->ntrain);
    cJSON_AddNumberToObject(sp, "training_molecules", t->ntrain_mol);
    cJSON_AddNumberToObject(sp, "validation_structures", (double)t->nval);
    cJSON_AddNumberToObject(sp, "validation_molecules", t->nval_mol);
    if (t->always_matched > 0)
        cJSON_AddNumberToObject(sp, "molecules_always_trained", t->always_matched);
    tr = cJSON_AddObjectToObject(o, "training");
    cJSON_AddNumberToObject(tr, "epochs", t->epoch);
    cJSON_AddNumberToObject(tr, "epoch_limit", t->cfg.epochs);
    cJSON *be = cJSON_AddArrayToObject(tr, "best_epoch_per_member");
    for (int k = 0; k < t->K; k++)
        cJSON_AddItemToArray(be, cJSON_CreateNumber(t->mem[k].best_epoch));
    cJSON_AddNumberToObject(tr, "batch", t->cfg.batch);
    cJSON_AddNumberToObject(tr, "force_weight", t->cfg.force_weight);
    if (t->cfg.energy_window > 0)
        cJSON_AddNumberToObject(tr, "energy_window", t->cfg.energy_window);
    if (t->cfg.molecule_offset > 0)
        cJSON_AddNumberToObject(tr, "molecule_offset", t->cfg.molecule_offset);
    cJSON_AddNumberToObject(tr, "learning_rate", t->cfg.learning_rate);
    cJSON_AddNumberToObject(tr, "learning_rate_floor", t->cfg.min_learning_rate);
    cJSON_AddNumberToObject(tr, "weight_decay", t->cfg.weight_decay);
    cJSON_AddNumberToObject(tr, "seed", (double)t->cfg.seed);
    if (t->start_name) {
        const char *sb = strrchr(t->start_name, '/');
        cJSON_AddStringToObject(tr, "started_from", sb ? sb + 1 : t->start_name);
        if (t->widened_from > 0) /* its features kept, new ones added at zero weight */
            cJSON_AddNumberToObject(tr, "descriptor_widened_from_features", t->widened_from);
    }
    /* validation errors of the saved (best) weights, ensemble mean */
    nd_train_errors v = t->last_valid;
    if (t->nval > 0) {
        double *pe = calloc((size_t)t->nval, sizeof(double));
        double *pf = calloc(3 * (size_t)t->nval_atoms + 1, sizeof(double));
        double *e1 = calloc((size_t)t->nval, sizeof(double));
        double *f1 = calloc(3 * (size_t)t->nval_atoms + 1, sizeof(double));
        runner r;
        memset(&r, 0, sizeof r);
        if (pe && pf && e1 && f1 && runner_init(&r) == 0) {
            int ok = 1;
            for (int k = 0; k < t->K && ok; k++) {
                job jb = {0};
                jb.m = m;
                jb.k = k;
                jb.d = t->d;
                jb.want_forces = 1;
                jb.pred_e = e1;
                jb.pred_f = f1;
                jb.pred_off = t->val_off;
                sums tot;
                nd_error e2;
                ok = runner_run(&r, &jb, t->val_idx, t->nval, EVAL_CHUNK, &tot, &e2) == ND_OK;
                for (long j = 0; j < t->nval; j++)
                    pe[j] += e1[j] / t->K;
                for (long c = 0; c < 3 * t->nval_atoms; c++)
                    pf[c] += f1[c] / t->K;
            }
            if (ok)
                valid_errors(t, pe, pf, &v);
        }
        runner_free(&r);
        free(pe);
        free(pf);
        free(e1);
        free(f1);
    }
    va = cJSON_AddObjectToObject(o, "validation");
    add_num(va, "energy_mae", v.energy_mae);
    add_num(va, "energy_rmse", v.energy_rmse);
    add_num(va, "force_mae", v.force_mae);
    add_num(va, "force_rmse", v.force_rmse);
    add_num(va, "relative_energy_mae", v.relative_mae);
    char *txt = cJSON_PrintUnformatted(o);
    cJSON_Delete(o);
    if (!txt) {
        nd_model_free(m);
        return nd_fail(err, ND_ENOMEM, "train: out of memory");
    }
    s = nd_model_set_provenance(m, txt, err);
    free(txt);
    if (s) {
        nd_model_free(m);
        return s;
    }
    *out = m;
    return ND_OK;
}
