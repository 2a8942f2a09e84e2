/* Energy and gradient of a model on one molecule, single or batched; the
 * nd_energy adapter. See potential.h.
 *
 * One evaluation of m structures (N = m n atoms) runs in four stages:
 *  1. neighbour lists (cell lists) within the largest cutoff;
 *  2. descriptors, atom-parallel (OpenMP), each written to its row in the
 *     matrix of its element (rows: element, then structure, then atom);
 *  3. the networks, element by element, in chunks of rows: one matrix
 *     product per layer (OpenBLAS's dgemm; for chunks of at most
 *     ND_SMALL_GEMM_MAX_ROWS rows, as on one molecule, small_gemm.c's
 *     kernels, which do not copy the weights), forward then backward to
 *     U = dE/dG, with the input scaling folded into layer 1 when the
 *     potential is made;
 *  4. the contraction F = -J^T U, atom-parallel (from the angular set-up
 *     that stage 2 kept when a gradient is wanted): each centre writes the
 *     derivative of its own energy (and, for the radial terms of pairs it
 *     owns, of its neighbour's) with respect to itself and to each
 *     neighbour into its own per-pair slots; the slots are then added up
 *     per structure in pair order. Nothing is accumulated across threads,
 *     so the bits do not depend on the thread count.
 * OpenBLAS is set to one thread: nadir's threads are OpenMP's, and each
 * dgemm of a chunk of rows runs on the thread that owns the chunk. */
#include "potential/potential.h"

#include "potential/network.h"
#include "potential/neighbors.h"

#include <cblas.h>
#include <math.h>
#include <omp.h>
#include <stdlib.h>
#include <string.h>

#define CHUNK_ROWS 512        /* rows per network pass (bounded memory) */
#define MAX_BATCH_ATOMS 16384 /* atoms per sub-batch of a large batch */
#define PARALLEL_MIN_ATOMS 256 /* below this, one thread: a team costs more than it saves */

typedef struct workspace {
    int in_use;
    int cap_n;            /* atoms it is sized for */
    int nthr;             /* per-thread scratch slots */
    int nrun;             /* threads of the current call (<= nthr) */
    size_t cap_scr;       /* doubles per thread of descriptor scratch */
    int cap_nn;           /* ints per thread */
    size_t cap_pairs;
    nd_neighbors nb;
    int *species;         /* per atom of the batch */
    int *row;             /* matrix row of each atom of the batch */
    double *G, *U;        /* N x D */
    double *E;            /* N x K atomic energies */
    double *chunk_work, *chunk_e; /* one network chunk per thread */
    size_t chunk_work_len;
    double *scr;          /* nthr x cap_scr */
    int *iscr;            /* nthr x cap_nn */
    double *pairg;        /* 3 per pair */
    double *selfg;        /* 3 per atom */
    double *gbuf;         /* 3 per atom: one member's gradient of a batch */
    /* the angular set-up of each atom, kept from the descriptor pass for
     * the contraction: its record, and where its rows are (a per-thread
     * arena, grown as needed, and an offset into it) */
    nd_angular_kept *kept;
    int *kept_arena;
    size_t *kept_off;
    double **arena;
    size_t *arena_cap, *arena_used;
} workspace;

struct nd_potential {
    const nd_model *model;
    int n, mode;
    int *z, *species;     /* per atom of one structure */
    int count[ND_MODEL_MAX_ELEMENTS], first[ND_MODEL_MAX_ELEMENTS + 1];
    int *rank;            /* index of atom i among the atoms of its element */
    double *W1[ND_MODEL_MAX_ELEMENTS], *b1[ND_MODEL_MAX_ELEMENTS]; /* folded layer 1, elements present */
    omp_lock_t lock;
    workspace **pool;
    int npool, cap_pool;
};

int nd_potential_new(nd_potential **out, const nd_model *model, int n, const int *z, int mode,
                     nd_error *err)
{
    *out = NULL;
    if (!model || n < 0 || (n > 0 && !z))
        return nd_fail(err, ND_EINVAL, "potential: no model or bad atom list");
    if (mode != ND_POTENTIAL_MEAN && (mode < 0 || mode >= model->nmembers))
        return nd_fail(err, ND_EINVAL, "potential: member %d does not exist (the model has %d)",
                       mode, model->nmembers);
    int s = nd_model_check_atoms(model, n, z, 0, err);
    if (s)
        return s;
    nd_potential *p = calloc(1, sizeof *p);
    if (!p)
        return nd_fail(err, ND_ENOMEM, "potential: out of memory");
    p->model = model;
    p->n = n;
    p->mode = mode;
    size_t na = (size_t)(n > 0 ? n : 1);
    p->z = malloc(na * sizeof(int));
    p->species = malloc(na * sizeof(int));
    p->rank = malloc(na * sizeof(int));
    if (!p->z || !p->species || !p->rank) {
        free(p->z);
        free(p->species);
        free(p->rank);
        free(p);
        return nd_fail(err, ND_ENOMEM, "potential: out of memory");
    }
    for (int i = 0; i < n; i++) {
        p->z[i] = z[i];
        int e = model->slot_of_z[z[i]];
        p->species[i] = e;
        p->rank[i] = p->count[e]++;
    }
    p->first[0] = 0;
    for (int e = 0; e < model->nel; e++)
        p->first[e + 1] = p->first[e] + p->count[e];
    size_t h1 = (size_t)model->nmembers * (size_t)model->width[1];
    for (int e = 0; e < model->nel; e++) {
        if (!p->count[e])
            continue;
        p->W1[e] = malloc(h1 * (size_t)model->D * sizeof(double));
        p->b1[e] = malloc(h1 * sizeof(double));
        if (!p->W1[e] || !p->b1[e]) {
            omp_init_lock(&p->lock);
            nd_potential_free(p);
            return nd_fail(err, ND_ENOMEM, "potential: out of memory");
        }
        nd_net_fold_input(model, e, p->W1[e], p->b1[e]);
    }
    omp_init_lock(&p->lock);
    *out = p;
    return ND_OK;
}

/* Frees one workspace. */
static void ws_free(workspace *w)
{
    if (!w)
        return;
    nd_neighbors_free(&w->nb);
    free(w->species);
    free(w->row);
    free(w->G);
    free(w->U);
    free(w->E);
    free(w->chunk_work);
    free(w->chunk_e);
    free(w->scr);
    free(w->iscr);
    free(w->pairg);
    free(w->selfg);
    free(w->gbuf);
    free(w->kept);
    free(w->kept_arena);
    free(w->kept_off);
    for (int t = 0; t < w->nthr && w->arena; t++)
        free(w->arena[t]);
    free(w->arena);
    free(w->arena_cap);
    free(w->arena_used);
    free(w);
}

void nd_potential_free(nd_potential *p)
{
    if (!p)
        return;
    for (int i = 0; i < p->npool; i++)
        ws_free(p->pool[i]);
    free(p->pool);
    omp_destroy_lock(&p->lock);
    for (int e = 0; e < ND_MODEL_MAX_ELEMENTS; e++) {
        free(p->W1[e]);
        free(p->b1[e]);
    }
    free(p->z);
    free(p->species);
    free(p->rank);
    free(p);
}

int nd_potential_atoms(const nd_potential *p) { return p->n; }
int nd_potential_mode(const nd_potential *p) { return p->mode; }
const nd_model *nd_potential_model(const nd_potential *p) { return p->model; }

/* Takes a free workspace from the pool (or adds a new one). NULL if out of memory. */
static workspace *ws_acquire(nd_potential *p)
{
    workspace *w = NULL;
    omp_set_lock(&p->lock);
    for (int i = 0; i < p->npool; i++)
        if (!p->pool[i]->in_use) {
            w = p->pool[i];
            break;
        }
    if (!w) {
        if (p->npool == p->cap_pool) {
            int nc = p->cap_pool ? 2 * p->cap_pool : 4;
            workspace **q = realloc(p->pool, (size_t)nc * sizeof *q);
            if (q) {
                p->pool = q;
                p->cap_pool = nc;
            }
        }
        if (p->npool < p->cap_pool && (w = calloc(1, sizeof *w)))
            p->pool[p->npool++] = w;
    }
    if (w)
        w->in_use = 1;
    omp_unset_lock(&p->lock);
    return w;
}

static void ws_release(nd_potential *p, workspace *w)
{
    omp_set_lock(&p->lock);
    w->in_use = 0;
    omp_unset_lock(&p->lock);
}

/* realloc that frees nothing on failure; ND_ENOMEM. */
static int resize(void *pp, size_t bytes)
{
    void **p = pp;
    void *q = realloc(*p, bytes ? bytes : 1);
    if (!q)
        return ND_ENOMEM;
    *p = q;
    return ND_OK;
}

/* Sizes w for N atoms (per-atom and network buffers). */
static int ws_size_atoms(const nd_potential *p, workspace *w, int N)
{
    if (N <= w->cap_n && w->species)
        return ND_OK;
    const nd_model *m = p->model;
    size_t n = (size_t)N, D = (size_t)m->D, K = (size_t)m->nmembers;
    if (resize(&w->species, n * sizeof(int)) || resize(&w->row, n * sizeof(int)) ||
        resize(&w->G, n * D * sizeof(double)) || resize(&w->U, n * D * sizeof(double)) ||
        resize(&w->E, n * K * sizeof(double)) || resize(&w->selfg, 3 * n * sizeof(double)) ||
        resize(&w->gbuf, 3 * n * sizeof(double)) || resize(&w->kept, n * sizeof *w->kept) ||
        resize(&w->kept_arena, n * sizeof(int)) || resize(&w->kept_off, n * sizeof(size_t)))
        return ND_ENOMEM;
    w->cap_n = N;
    return ND_OK;
}

/* Sizes the per-thread scratch and the pair buffer after the neighbour search. */
static int ws_size_pairs(const nd_potential *p, workspace *w, int nthr)
{
    size_t scr = nd_descriptor_scratch_doubles(&p->model->desc, p->model->nel, w->nb.maxnn);
    int nn = w->nb.maxnn > 0 ? w->nb.maxnn : 1;
    if (nthr > w->nthr || scr > w->cap_scr || nn > w->cap_nn) {
        int t = nthr > w->nthr ? nthr : w->nthr;
        size_t s = scr > w->cap_scr ? scr : w->cap_scr;
        int c = nn > w->cap_nn ? nn : w->cap_nn;
        const nd_model *m = p->model;
        size_t K = (size_t)m->nmembers;
        w->chunk_work_len = nd_net_work_doubles(m, CHUNK_ROWS, (int)K);
        if (resize(&w->scr, (size_t)t * s * sizeof(double)) ||
            resize(&w->iscr, (size_t)t * (size_t)c * sizeof(int)) ||
            resize(&w->chunk_work, (size_t)t * w->chunk_work_len * sizeof(double)) ||
            resize(&w->chunk_e, (size_t)t * CHUNK_ROWS * K * sizeof(double)) ||
            resize(&w->arena, (size_t)t * sizeof(double *)) ||
            resize(&w->arena_cap, (size_t)t * sizeof(size_t)) ||
            resize(&w->arena_used, (size_t)t * sizeof(size_t)))
            return ND_ENOMEM;
        for (int k = w->nthr; k < t; k++) {
            w->arena[k] = NULL;
            w->arena_cap[k] = 0;
        }
        w->nthr = t;
        w->cap_scr = s;
        w->cap_nn = c;
    }
    size_t np = (size_t)w->nb.start[w->nb.natoms];
    if (np > w->cap_pairs || !w->pairg) {
        if (resize(&w->pairg, 3 * np * sizeof(double)))
            return ND_ENOMEM;
        w->cap_pairs = np;
    }
    return ND_OK;
}

/* Network pass over all atoms of the batch (ms structures) for members
 * k0 .. k1-1: atomic energies into w->E columns k0.., and when coef != 0 the
 * backward pass into w->U. The rows of each element are cut into chunks at
 * fixed places, and the chunks are shared among the threads: each dgemm
 * runs on one thread, so the bits do not depend on the thread count. */
static void network_pass(const nd_potential *p, workspace *w, int ms, int k0, int k1, double coef)
{
    const nd_model *m = p->model;
    const int D = m->D, K = m->nmembers, nk = k1 - k0;
    int task_e[ND_MODEL_MAX_ELEMENTS + 1], ntask = 0;
    task_e[0] = 0;
    for (int e = 0; e < m->nel; e++) {
        int rows = ms * p->count[e];
        ntask += (rows + CHUNK_ROWS - 1) / CHUNK_ROWS;
        task_e[e + 1] = ntask;
    }
#pragma omp parallel num_threads(w->nrun)
    {
        int t = omp_get_thread_num();
        double *work = w->chunk_work + (size_t)t * w->chunk_work_len;
        double *ec = w->chunk_e + (size_t)t * CHUNK_ROWS * K;
#pragma omp for schedule(dynamic, 1)
        for (int task = 0; task < ntask; task++) {
            int e = 0;
            while (task >= task_e[e + 1])
                e++;
            int rows = ms * p->count[e];
            int r0 = (task - task_e[e]) * CHUNK_ROWS;
            int nr = rows - r0 < CHUNK_ROWS ? rows - r0 : CHUNK_ROWS;
            size_t row = (size_t)ms * p->first[e] + (size_t)r0;
            size_t h1 = (size_t)k0 * (size_t)m->width[1];
            const double *W1 = p->W1[e] + h1 * (size_t)D, *b1 = p->b1[e] + h1;
            nd_net_forward_folded(m, e, k0, k1, nr, w->G + row * D, W1, b1, work, ec);
            for (int r = 0; r < nr; r++)
                for (int k = 0; k < nk; k++)
                    w->E[(row + (size_t)r) * K + (size_t)(k0 + k)] = ec[(size_t)r * nk + k];
            if (coef != 0)
                nd_net_backward_folded(m, e, k0, k1, nr, coef, W1, work, w->U + row * D);
        }
    }
}

/* Rows for the kept angular set-up of an atom with nn neighbours in thread
 * t's arena (grown when short), or NULL if out of memory: the atom's set-up
 * is then not kept, only computed again. */
static double *arena_rows(workspace *w, int t, int nn)
{
    size_t need = ND_DESC_KEPT_ROWS * (size_t)(nn > 0 ? nn : 1);
    if (w->arena_cap[t] - w->arena_used[t] < need) {
        size_t cap = 2 * w->arena_cap[t];
        if (cap < w->arena_used[t] + need)
            cap = w->arena_used[t] + need;
        if (resize(&w->arena[t], cap * sizeof(double)))
            return NULL;
        w->arena_cap[t] = cap;
    }
    return w->arena[t] + w->arena_used[t];
}

/* Contraction: gradient of sum_i U_i . G_i for every atom of the batch into
 * g (N x 3). */
static void contract(const nd_potential *p, workspace *w, const double *x, double *g)
{
    const nd_model *m = p->model;
    const nd_neighbors *nb = &w->nb;
    const int N = nb->natoms, D = m->D;
#pragma omp parallel num_threads(w->nrun)
    {
        int t = omp_get_thread_num();
        double *scr = w->scr + (size_t)t * w->cap_scr;
        int *iscr = w->iscr + (size_t)t * w->cap_nn;
#pragma omp for schedule(dynamic, 64)
        for (int a = 0; a < N; a++) {
            int s0 = nb->start[a];
            const nd_angular_kept *k = w->kept[a].cnt >= 0 ? &w->kept[a] : NULL;
            const double *rows = k ? w->arena[w->kept_arena[a]] + w->kept_off[a] : NULL;
            nd_descriptor_atom_grad_kept(&m->desc, m->nel, x, w->species, a, nb->list + s0,
                                         nb->start[a + 1] - s0, w->U, w->row, D,
                                         w->selfg + 3 * (size_t)a, w->pairg + 3 * (size_t)s0, scr,
                                         iscr, k, rows);
        }
    }
    /* gather: each atom's own term, then the pair terms in pair order (a
     * fixed order; one structure per thread for a batch) */
    const int n = p->n, ms = n > 0 ? N / n : 0;
#pragma omp parallel for schedule(static) num_threads(w->nrun) if (ms > 1)
    for (int st = 0; st < ms; st++) {
        int a0 = st * n, a1 = a0 + n;
        memcpy(g + 3 * (size_t)a0, w->selfg + 3 * (size_t)a0, 3 * (size_t)n * sizeof(double));
        for (int a = a0; a < a1; a++)
            for (int q = nb->start[a]; q < nb->start[a + 1]; q++) {
                const double *v = w->pairg + 3 * (size_t)q;
                double *gb = g + 3 * (size_t)nb->list[q];
                gb[0] += v[0];
                gb[1] += v[1];
                gb[2] += v[2];
            }
    }
}

/* Total energy of member k of structure s from the atomic energies. */
static double total_energy(const nd_potential *p, const workspace *w, int s, int k)
{
    const nd_model *m = p->model;
    double sum = 0;
    for (int i = 0; i < p->n; i++)
        sum += w->E[(size_t)w->row[s * p->n + i] * m->nmembers + k] + m->offset[p->species[i]];
    return sum;
}

/* Checks that v[0..n) is finite. */
static int all_finite(const double *v, size_t n)
{
    for (size_t i = 0; i < n; i++)
        if (!isfinite(v[i]))
            return 0;
    return 1;
}

/* One sub-batch of ms structures; outputs already offset to it. */
static int compute_batch(nd_potential *p, workspace *w, int ms, int first, const double *x,
                         double *energy, double *grad, double *member_energy, double *member_grad,
                         nd_error *err)
{
    const nd_model *m = p->model;
    const int n = p->n, N = ms * n, K = m->nmembers, D = m->D;
    int s = ws_size_atoms(p, w, N);
    if (s)
        return nd_fail(err, ND_ENOMEM, "potential: out of memory for %d atoms", N);
    s = nd_neighbors_build(&w->nb, ms, n, x, nd_model_cutoff(m), err);
    if (s)
        return s;
    int nthr = omp_in_parallel() || N < PARALLEL_MIN_ATOMS ? 1 : omp_get_max_threads();
    /* nadir's threads are OpenMP's: OpenBLAS runs each dgemm on the calling
     * thread. Its own threading would split a dgemm differently at
     * different thread counts (other bits) and compete with OpenMP for the
     * cores. Setting the same value again is harmless. */
    if (openblas_get_num_threads() != 1)
        openblas_set_num_threads(1);
    if (ws_size_pairs(p, w, nthr))
        return nd_fail(err, ND_ENOMEM, "potential: out of memory for the neighbour pairs");
    w->nrun = nthr;
    for (int st = 0; st < ms; st++)
        for (int i = 0; i < n; i++) {
            int e = p->species[i];
            w->species[st * n + i] = e;
            w->row[st * n + i] = ms * p->first[e] + st * p->count[e] + p->rank[i];
        }
    /* stage 2: descriptors */
    const nd_neighbors *nb = &w->nb;
#pragma omp parallel num_threads(w->nrun)
    {
        int t = omp_get_thread_num();
        double *scr = w->scr + (size_t)t * w->cap_scr;
        int *iscr = w->iscr + (size_t)t * w->cap_nn;
        w->arena_used[t] = 0;
#pragma omp for schedule(dynamic, 64)
        for (int a = 0; a < N; a++) {
            int s0 = nb->start[a], nn = nb->start[a + 1] - s0;
            double *rows = grad || member_grad ? arena_rows(w, t, nn) : NULL;
            w->kept[a].cnt = -1;
            if (rows) {
                nd_descriptor_atom_keep(&m->desc, m->nel, x, w->species, a, nb->list + s0, nn,
                                        w->G + (size_t)w->row[a] * D, scr, iscr, &w->kept[a], rows);
                w->kept_arena[a] = t;
                w->kept_off[a] = w->arena_used[t];
                if (w->kept[a].cnt >= 0)
                    w->arena_used[t] +=
                        ND_DESC_KEPT_ROWS * (size_t)(w->kept[a].cnt > 0 ? w->kept[a].cnt : 1);
            } else {
                nd_descriptor_atom(&m->desc, m->nel, x, w->species, a, nb->list + s0, nn,
                                   w->G + (size_t)w->row[a] * D, scr, iscr);
            }
        }
    }
    /* stage 3 and 4 */
    int mode = p->mode;
    int all = mode == ND_POTENTIAL_MEAN || member_energy || member_grad;
    int k0 = all ? 0 : mode, k1 = all ? K : mode + 1;
    int fused = grad && (mode == ND_POTENTIAL_MEAN || (k0 == mode && k1 == mode + 1));
    double coef = mode == ND_POTENTIAL_MEAN ? 1.0 / K : 1.0;
    network_pass(p, w, ms, k0, k1, fused ? coef : 0);
    if (grad && !fused) {
        network_pass(p, w, ms, mode, mode + 1, 1.0);
    }
    if (grad) {
        contract(p, w, x, grad);
        if (!all_finite(grad, 3 * (size_t)N))
            return nd_fail(err, ND_ECOMPUTE, "potential: non-finite gradient (atoms too close?)");
    }
    for (int st = 0; st < ms; st++) {
        double mean = 0;
        for (int k = k0; k < k1; k++) {
            double ek = total_energy(p, w, st, k);
            if (member_energy)
                member_energy[(size_t)st * K + k] = ek;
            if (mode == ND_POTENTIAL_MEAN)
                mean += ek;
            else if (k == mode)
                mean = ek;
        }
        if (mode == ND_POTENTIAL_MEAN)
            mean /= K;
        if (!isfinite(mean))
            return nd_fail(err, ND_ECOMPUTE,
                           "potential: non-finite energy for structure %d (atoms too close?)",
                           first + st + 1);
        if (energy)
            energy[st] = mean;
    }
    if (member_grad) {
        for (int k = 0; k < K; k++) {
            network_pass(p, w, ms, k, k + 1, 1.0);
            /* contract into a per-member scratch, then scatter structure-major */
            double *gk = member_grad; /* m * K * 3n: structure st, member k at (st*K + k)*3n */
            if (ms == 1) {
                contract(p, w, x, gk + (size_t)k * 3 * n);
            } else {
                contract(p, w, x, w->gbuf);
                for (int st = 0; st < ms; st++)
                    memcpy(gk + ((size_t)st * K + k) * 3 * n, w->gbuf + (size_t)st * 3 * n,
                           3 * (size_t)n * sizeof(double));
            }
        }
        if (!all_finite(member_grad, (size_t)ms * K * 3 * n))
            return nd_fail(err, ND_ECOMPUTE, "potential: non-finite member gradient");
    }
    return ND_OK;
}

int nd_potential_compute(nd_potential *p, int m, const double *x, double *energy, double *grad,
                         double *member_energy, double *member_grad, nd_error *err)
{
    if (!p || m < 0 || (m > 0 && !x))
        return nd_fail(err, ND_EINVAL, "potential: bad arguments");
    if (m == 0)
        return ND_OK;
    workspace *w = ws_acquire(p);
    if (!w)
        return nd_fail(err, ND_ENOMEM, "potential: out of memory");
    const int n = p->n, K = p->model->nmembers;
    int per = n > 0 ? MAX_BATCH_ATOMS / n : m;
    if (per < 1)
        per = 1;
    int s = ND_OK;
    for (int s0 = 0; s0 < m && s == ND_OK; s0 += per) {
        int ms = m - s0 < per ? m - s0 : per;
        size_t xo = (size_t)s0 * 3 * n;
        s = compute_batch(p, w, ms, s0, x + xo, energy ? energy + s0 : NULL, grad ? grad + xo : NULL,
                          member_energy ? member_energy + (size_t)s0 * K : NULL,
                          member_grad ? member_grad + xo * K : NULL, err);
    }
    ws_release(p, w);
    return s;
}

/* nd_energy_fn for one structure. */
static int energy_fn(void *ctx, int n, const double *x, double *energy, double *g)
{
    nd_potential *p = ctx;
    if (n != p->n)
        return ND_EINVAL;
    return nd_potential_compute(p, 1, x, energy, g, NULL, NULL, NULL);
}

/* nd_energy_batch_fn for m structures. */
static int energy_batch_fn(void *ctx, int n, int m, const double *x, double *energy, double *g)
{
    nd_potential *p = ctx;
    if (n != p->n)
        return ND_EINVAL;
    return nd_potential_compute(p, m, x, energy, g, NULL, NULL, NULL);
}

nd_energy nd_potential_energy(nd_potential *p)
{
    nd_energy e = {energy_fn, energy_batch_fn, p};
    return e;
}
