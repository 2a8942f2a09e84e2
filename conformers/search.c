#include "conformers/search.h"

#include "conformers/embed.h"
#include "conformers/rank.h"
#include "conformers/sample.h"
#include "conformers/topology.h"
#include "conformers/verify.h"
#include "core/rng.h"
#include "optimize/modes.h"
#include "optimize/repair.h"
#include "optimize/thermo.h"

#include <cblas.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

/* Outcome of one candidate. */
enum {
    CAND_OK = 0,
    CAND_CLASH,
    CAND_EMBED,
    CAND_UNCONVERGED,
    CAND_FAILED,
    CAND_BONDING,
    CAND_STEREO,
    CAND_DOUBLE,
    CAND_FATAL
};

/* Slack added to the window when choosing the minima to check, kcal/mol:
 * the tight minimisation and repairs lower energies a little. */
#define FINISH_SLACK 1.0

/* Minima up to this far above the window still have their neighbourhood
 * explored (follow-ups), kcal/mol: a low minimum may be reachable by one
 * torsion change only from a higher one. */
#define EXPLORE_SLACK 2.5

struct nd_search {
    nd_search_options opt;
    nd_molecule mol;      /* copy, with the stereo of the first structure stated */
    nd_energy pot;
    nd_topology topo;
    nd_sampler *smp;
    nd_verify *ver;
    nd_dedup *dd;
    int n;
    size_t stride;        /* 3n */
    double *start;
    /* minima found */
    int npool, cap;
    double *px, *pe;
    long *pfound;
    long sys_total;       /* systematic candidates (0: none) */
    int rigid;            /* 1: nothing to sample */
    int *queue;           /* follow-ups: pairs (minimum, move), see queue_follow_ups */
    int qhead, qtail, qcap;
    nd_search_counts st;
    int sampling_done, finished;
    /* batch scratch */
    double *bx, *be;
    int *bstat, *bcalls;
    nd_error *berr;
    /* results */
    int nconf;
    nd_conformer *conf;
    double *cx;
};

void nd_search_options_default(nd_search_options *o)
{
    memset(o, 0, sizeof *o);
    o->seed = 1;
    o->max_tries = 2000;
    o->batch = 16;
    o->systematic_max = 500;
    o->quiet_rounds = 3;
    o->window = 5.0;
    o->max_conformers = 0;
    o->temperature = 298.15;
    o->clash_ratio = 0.35;
    o->fresh_fraction = 0.2;
    o->dedup = nd_dedup_defaults();
    o->check_modes = 1;
    o->free_energy = 0;
    o->method = NULL;
    nd_minimize_options_default(&o->relax);
    o->uncertainty_mark = 0.5;
}

const char *nd_search_stop_name(nd_search_stop s)
{
    switch (s) {
    case ND_SEARCH_RUNNING: return "running";
    case ND_SEARCH_QUIET: return "no new low minima";
    case ND_SEARCH_BUDGET: return "budget spent";
    case ND_SEARCH_RIGID: return "nothing to sample";
    }
    return "unknown";
}

void nd_search_free(nd_search *s)
{
    if (!s)
        return;
    nd_molecule_free(&s->mol);
    nd_topology_free(&s->topo);
    nd_sampler_free(s->smp);
    nd_verify_free(s->ver);
    nd_dedup_free(s->dd);
    free(s->start);
    free(s->px);
    free(s->pe);
    free(s->pfound);
    free(s->queue);
    free(s->bx);
    free(s->be);
    free(s->bstat);
    free(s->bcalls);
    free(s->berr);
    free(s->conf);
    free(s->cx);
    free(s);
}

int nd_search_new(nd_search **out, const nd_molecule *mol, const nd_energy *pot,
                  const nd_search_options *opt, nd_error *err)
{
    *out = NULL;
    if (!mol || !pot || !pot->fn)
        return nd_fail(err, ND_EINVAL, "conformer search: no molecule or no potential");
    if (mol->natoms < 1)
        return nd_fail(err, ND_EINPUT, "conformer search: the molecule has no atoms");
    if (mol->natoms > 1 && (!mol->has_bonds || mol->nbonds == 0))
        return nd_fail(err, ND_EINPUT, "conformer search: the molecule has no bond table");
    nd_search *s = calloc(1, sizeof *s);
    if (!s)
        return nd_fail(err, ND_ENOMEM, "out of memory starting the conformer search");
    int status;
    if (opt)
        s->opt = *opt;
    else
        nd_search_options_default(&s->opt);
    if (s->opt.batch < 1 || s->opt.max_tries < 1 || s->opt.quiet_rounds < 1) {
        nd_search_free(s);
        return nd_fail(err, ND_EINVAL, "conformer search: batch, budget and quiet rounds must be >= 1");
    }
    if (s->opt.free_energy)
        s->opt.check_modes = 1;
    /* nadir's threads are OpenMP's (as in potential/ and optimize/modes.c):
     * OpenBLAS's own threads would change the last bits of the embedding's
     * eigenvectors (dsyevr) with the thread count, and so the whole search. */
    if (openblas_get_num_threads() != 1)
        openblas_set_num_threads(1);
    s->pot = *pot;
    s->n = mol->natoms;
    s->stride = 3 * (size_t)s->n;
    nd_molecule_init(&s->mol);
    if ((status = nd_molecule_copy(&s->mol, mol, err)) != ND_OK)
        goto fail;
    s->start = malloc(s->stride * sizeof *s->start);
    size_t b = (size_t)s->opt.batch;
    s->bx = malloc(b * s->stride * sizeof *s->bx);
    s->be = malloc(b * sizeof *s->be);
    s->bstat = malloc(b * sizeof *s->bstat);
    s->bcalls = malloc(b * sizeof *s->bcalls);
    s->berr = malloc(b * sizeof *s->berr);
    if (!s->start || !s->bx || !s->be || !s->bstat || !s->bcalls || !s->berr) {
        status = nd_fail(err, ND_ENOMEM, "out of memory starting the conformer search");
        goto fail;
    }
    if (mol->dimension == 3 || s->n == 1) {
        memcpy(s->start, mol->xyz, s->stride * sizeof *s->start);
    } else if ((status = nd_embed(&s->mol, s->opt.seed, 0, NULL, s->start, err)) != ND_OK) {
        nd_error_prefix(err, "embedding the first structure");
        goto fail;
    }
    memcpy(s->mol.xyz, s->start, s->stride * sizeof *s->start);
    s->mol.dimension = 3;
    if ((status = nd_topology_build(&s->mol, &s->topo, err)) != ND_OK)
        goto fail;
    /* state the configuration of every four-coordinate atom the molecule
     * leaves open, from the first structure, so fresh embeddings keep it */
    for (int i = 0; i < s->n; i++) {
        if (s->mol.chirality[i] || nd_topology_degree(&s->topo, i) != 4)
            continue;
        const int *nb = s->topo.nbr + s->topo.start[i];
        double v = nd_verify_signed_volume(s->start, i, nb[0], nb[1], nb[2]);
        if (fabs(v) > 0.05)
            s->mol.chirality[i] = v > 0 ? 1 : -1;
    }
    if ((status = nd_sampler_new(&s->mol, &s->topo, &s->smp, err)) != ND_OK ||
        (status = nd_verify_new(&s->mol, s->start, &s->ver, err)) != ND_OK ||
        (status = nd_dedup_new(&s->mol, &s->opt.dedup, &s->dd, err)) != ND_OK)
        goto fail;
    if (s->n > 1) {
        int atom;
        nd_verify_verdict v = nd_verify_check(s->ver, s->start, &atom);
        if (v != ND_VERIFY_OK) {
            status = nd_fail(err, ND_EINPUT,
                             "the starting structure does not match the molecule (%s at atom %d)",
                             nd_verify_name(v), atom + 1);
            goto fail;
        }
    }
    s->st.rotors = nd_sampler_rotors(s->smp);
    s->st.ring_flips = nd_sampler_flips(s->smp);
    s->st.inversions = nd_sampler_inversions(s->smp);
    s->st.combinations = nd_sampler_combinations(s->smp);
    if (s->st.combinations <= s->opt.systematic_max && s->st.combinations <= s->opt.max_tries)
        s->sys_total = (long)s->st.combinations;
    s->rigid = nd_sampler_dimensions(s->smp) == 0;
    for (int r = 0; r < s->topo.nrings && s->rigid; r++)
        if (!s->topo.ring_flat[r] && s->topo.ring_start[r + 1] - s->topo.ring_start[r] >= 4)
            s->rigid = 0;
    *out = s;
    return ND_OK;
fail:
    nd_search_free(s);
    return status;
}

/* Applies the states st[] of every dimension to x: flips and inversions
 * first (they move groups rigidly), then the rotors (absolute torsions). */
static void apply_states(const nd_sampler *smp, const int *st, double *x)
{
    int dims = nd_sampler_dimensions(smp), nr = nd_sampler_rotors(smp);
    for (int k = nr; k < dims; k++)
        nd_sampler_apply(smp, k, st[k], x);
    for (int k = 0; k < nr; k++)
        nd_sampler_apply(smp, k, st[k], x);
}

/* Builds candidate number id into x. order/nwin: minima by energy and how
 * many of them lie within the window (the parents of mutations). Returns
 * CAND_OK or CAND_EMBED. */
static int build_candidate(const nd_search *s, long id, const int *order, int nwin, int follow,
                           double *x, int *st)
{
    const nd_sampler *smp = s->smp;
    int dims = nd_sampler_dimensions(smp), nr = nd_sampler_rotors(smp);
    if (id < s->sys_total) { /* systematic: mixed-radix digits of id */
        long rest = id;
        for (int k = 0; k < dims; k++) {
            int ns = nd_sampler_states(smp, k);
            st[k] = (int)(rest % ns);
            rest /= ns;
        }
        memcpy(x, s->start, s->stride * sizeof *x);
        apply_states(smp, st, x);
        return CAND_OK;
    }
    if (follow >= 0) { /* a follow-up of a minimum */
        int parent = s->queue[3 * follow], move = s->queue[3 * follow + 1];
        memcpy(x, s->px + (size_t)parent * s->stride, s->stride * sizeof *x);
        if (move < 0) {
            for (int k = 0; k < nr; k++) {
                const nd_rotor *q = nd_sampler_rotor(smp, k);
                nd_sampler_set_torsion(smp, k, -nd_sampler_dihedral(x, q->a, q->b, q->c, q->d), x);
            }
        } else {
            nd_sampler_apply(smp, move / ND_ROTOR_MAX_VALUES, move % ND_ROTOR_MAX_VALUES, x);
        }
        return CAND_OK;
    }
    nd_rng r;
    nd_rng_stream(&r, s->opt.seed, (uint64_t)id);
    double u = nd_rng_uniform(&r);
    if (s->npool == 0 || dims == 0 || u < s->opt.fresh_fraction) {
        if (s->n > 1 && nd_embed(&s->mol, s->opt.seed, (int)(id + 1), NULL, x, NULL) != ND_OK)
            return CAND_EMBED;
        if (s->n == 1)
            memcpy(x, s->start, s->stride * sizeof *x);
        for (int k = 0; k < dims; k++)
            st[k] = (int)nd_rng_below(&r, (uint64_t)nd_sampler_states(smp, k));
        apply_states(smp, st, x);
        return CAND_OK;
    }
    double v = nd_rng_uniform(&r);
    int parent = order[(int)(nwin * v * v)];
    memcpy(x, s->px + (size_t)parent * s->stride, s->stride * sizeof *x);
    int nmut = 1 + (int)nd_rng_below(&r, (uint64_t)(dims < 3 ? dims : 3));
    for (int q = 0; q < nmut; q++) {
        int k = (int)nd_rng_below(&r, (uint64_t)dims);
        if (k < nr) {
            if (nd_rng_uniform(&r) < 0.25)
                nd_sampler_set_torsion(smp, k, 360.0 * nd_rng_uniform(&r), x);
            else
                nd_sampler_apply(smp, k,
                                 (int)nd_rng_below(&r, (uint64_t)nd_sampler_states(smp, k)), x);
        } else {
            nd_sampler_apply(smp, k, 1, x);
        }
    }
    return CAND_OK;
}

/* Index of a minimum in the pool that duplicates structure x of energy e,
 * or -1. */
static int find_duplicate(const nd_search *s, const double *x, double e)
{
    for (int i = 0; i < s->npool; i++) {
        if (fabs(s->pe[i] - e) > s->opt.dedup.energy_tol)
            continue;
        if (nd_dedup_rmsd(s->dd, s->px + (size_t)i * s->stride, x, NULL) < s->opt.dedup.rmsd)
            return i;
    }
    return -1;
}

/* Adds a minimum to the pool. */
static int pool_add(nd_search *s, const double *x, double e, long found, nd_error *err)
{
    if (s->npool == s->cap) {
        int cap = s->cap ? 2 * s->cap : 64;
        double *px = realloc(s->px, (size_t)cap * s->stride * sizeof *px);
        if (px)
            s->px = px;
        double *pe = realloc(s->pe, (size_t)cap * sizeof *pe);
        if (pe)
            s->pe = pe;
        long *pf = realloc(s->pfound, (size_t)cap * sizeof *pf);
        if (pf)
            s->pfound = pf;
        if (!px || !pe || !pf)
            return nd_fail(err, ND_ENOMEM, "out of memory storing minima");
        s->cap = cap;
    }
    memcpy(s->px + (size_t)s->npool * s->stride, x, s->stride * sizeof *x);
    s->pe[s->npool] = e;
    s->pfound[s->npool] = found;
    s->npool++;
    return ND_OK;
}

/* Appends one follow-up (minimum i, move) to the queue. */
static int queue_push(nd_search *s, int i, int move, nd_error *err)
{
    if (s->qtail == s->qcap) {
        int cap = s->qcap ? 2 * s->qcap : 256;
        int *q = realloc(s->queue, 3 * (size_t)cap * sizeof *q);
        if (!q)
            return nd_fail(err, ND_ENOMEM, "out of memory in the conformer search");
        s->queue = q;
        s->qcap = cap;
    }
    s->queue[3 * s->qtail] = i;
    s->queue[3 * s->qtail + 1] = move;
    s->queue[3 * s->qtail + 2] = 0; /* not used yet */
    s->qtail++;
    return ND_OK;
}

/* Queues the follow-ups of new minimum i (found within the window): its
 * torsion mirror image (move -1), and every single-rotor change to another
 * of the rotor's values more than 30 degrees from its present torsion
 * (move = rotor * ND_ROTOR_MAX_VALUES + value index): the neighbourhood
 * of the minimum in torsion space, explored breadth first. */
static int queue_follow_ups(nd_search *s, int i, nd_error *err)
{
    int nr = nd_sampler_rotors(s->smp);
    if (nr == 0)
        return ND_OK;
    int r = queue_push(s, i, -1, err);
    const double *x = s->px + (size_t)i * s->stride;
    for (int k = 0; k < nr && r == ND_OK; k++) {
        const nd_rotor *q = nd_sampler_rotor(s->smp, k);
        double now = nd_sampler_dihedral(x, q->a, q->b, q->c, q->d);
        for (int v = 0; v < q->nvalues && r == ND_OK; v++) {
            double d = fmod(fabs(q->values[v] - now), 360.0);
            if (d > 180)
                d = 360 - d;
            if (d > 30)
                r = queue_push(s, i, k * ND_ROTOR_MAX_VALUES + v, err);
        }
    }
    return r;
}

typedef struct {
    double e;
    int q;
} pending;

static int cmp_pending(const void *a, const void *b)
{
    const pending *x = a, *y = b;
    if (x->e != y->e)
        return x->e < y->e ? -1 : 1;
    return (x->q > y->q) - (x->q < y->q);
}

/* Chooses the follow-ups of the next batch (candidates first .. first+m-1):
 * the pending ones whose minimum has the lowest energy (ties in queue
 * order), at most three quarters of the batch's stochastic slots (rounded
 * up), so mutations and fresh starts keep a share. follow[i] receives the
 * queue entry of slot i or -1; *had_pending is 1 if any were pending. */
static int pick_follow_ups(nd_search *s, long first, int m, int *follow, int *had_pending)
{
    for (int i = 0; i < m; i++)
        follow[i] = -1;
    while (s->qhead < s->qtail && s->queue[3 * s->qhead + 2])
        s->qhead++;
    int npend = 0;
    for (int q = s->qhead; q < s->qtail; q++)
        npend += !s->queue[3 * q + 2];
    *had_pending = npend > 0;
    int slots = 0;
    for (int i = 0; i < m; i++)
        slots += first + i >= s->sys_total;
    int k = (3 * slots + 3) / 4;
    if (k > npend)
        k = npend;
    if (k == 0)
        return ND_OK;
    pending *p = malloc((size_t)npend * sizeof *p);
    if (!p)
        return ND_ENOMEM;
    int c = 0;
    for (int q = s->qhead; q < s->qtail; q++)
        if (!s->queue[3 * q + 2])
            p[c++] = (pending){s->pe[s->queue[3 * q]], q};
    qsort(p, (size_t)npend, sizeof *p, cmp_pending);
    int used = 0;
    for (int i = 0; i < m && used < k; i++)
        if (first + i >= s->sys_total) {
            follow[i] = p[used].q;
            s->queue[3 * p[used].q + 2] = 1;
            used++;
        }
    free(p);
    return ND_OK;
}

/* Minima sorted by energy into order (npool entries); returns how many lie
 * within the window of the lowest (at least 1 when there are any). */
static int pool_order(const nd_search *s, int *order)
{
    if (s->npool == 0)
        return 0;
    nd_rank_order(s->npool, s->pe, order);
    int nwin = 0;
    double e0 = s->pe[order[0]];
    while (nwin < s->npool && (s->opt.window < 0 || s->pe[order[nwin]] - e0 <= s->opt.window))
        nwin++;
    return nwin > 0 ? nwin : 1;
}

int nd_search_step(nd_search *s, nd_error *err)
{
    if (s->sampling_done)
        return ND_OK;
    long first = s->st.tried;
    int m = s->opt.batch;
    if (first + m > s->opt.max_tries)
        m = (int)(s->opt.max_tries - first);
    if (s->rigid)
        m = 1;
    int dims = nd_sampler_dimensions(s->smp);
    int *order = malloc((size_t)(s->npool > 0 ? s->npool : 1) * sizeof *order);
    int *states = malloc((size_t)m * (size_t)(dims > 0 ? dims : 1) * sizeof *states);
    if (!order || !states) {
        free(order);
        free(states);
        return nd_fail(err, ND_ENOMEM, "out of memory in the conformer search");
    }
    int nwin = pool_order(s, order);
    const nd_search *cs = s;
    /* stochastic slots take queued follow-ups first (pick_follow_ups) */
    int *follow = malloc((size_t)m * sizeof *follow);
    if (!follow) {
        free(order);
        free(states);
        return nd_fail(err, ND_ENOMEM, "out of memory in the conformer search");
    }
    int queued_at_start = 0;
    if (pick_follow_ups(s, first, m, follow, &queued_at_start) != ND_OK) {
        free(order);
        free(states);
        free(follow);
        return nd_fail(err, ND_ENOMEM, "out of memory in the conformer search");
    }

#pragma omp parallel for schedule(dynamic)
    for (int i = 0; i < m; i++) {
        double *x = s->bx + (size_t)i * s->stride;
        s->bcalls[i] = 0;
        s->be[i] = NAN;
        nd_error_clear(&s->berr[i]);
        int st = build_candidate(cs, first + i, order, nwin, follow[i], x,
                                 states + (size_t)i * (size_t)(dims > 0 ? dims : 1));
        if (st == CAND_OK && nd_sampler_clash(s->smp, x, s->opt.clash_ratio, NULL, NULL))
            st = CAND_CLASH;
        if (st == CAND_OK) {
            nd_minimize_result res;
            memset(&res, 0, sizeof res);
            int r = nd_minimize(s->opt.method, &s->pot, s->n, x, &s->opt.relax, &res, &s->berr[i]);
            s->bcalls[i] = res.force_calls;
            s->be[i] = res.energy;
            if (r == ND_CONTINUE)
                st = CAND_UNCONVERGED;
            else if (r == ND_ECOMPUTE)
                st = CAND_FAILED;
            else if (r != ND_OK)
                st = CAND_FATAL;
            else if (!isfinite(res.energy))
                st = CAND_FAILED;
        }
        if (st == CAND_OK) {
            nd_verify_verdict v = nd_verify_check(s->ver, x, NULL);
            if (v == ND_VERIFY_BONDING)
                st = CAND_BONDING;
            else if (v == ND_VERIFY_STEREO)
                st = CAND_STEREO;
            else if (v == ND_VERIFY_DOUBLE_BOND)
                st = CAND_DOUBLE;
        }
        s->bstat[i] = st;
    }
    free(order);
    free(states);
    free(follow);

    /* An external program that fails on one structure (for example an SCF
     * that does not converge on a strained start) costs that candidate
     * only, once the program has shown that it works (a minimum found
     * before or in this batch); otherwise its failure stops the search. */
    int any_ok = s->npool > 0;
    for (int i = 0; i < m; i++)
        any_ok |= s->bstat[i] == CAND_OK;
    for (int i = 0; i < m; i++)
        if (s->bstat[i] == CAND_FATAL && s->berr[i].code == ND_EEXTERNAL && any_ok)
            s->bstat[i] = CAND_FAILED;

    /* merge in candidate order */
    int added_low = 0, status = ND_OK;
    int first_new = s->npool;
    for (int i = 0; i < m; i++) {
        long id = first + i;
        s->st.tried++;
        s->st.force_calls += s->bcalls[i];
        int st = s->bstat[i];
        if (st != CAND_CLASH && st != CAND_EMBED)
            s->st.relaxed++;
        switch (st) {
        case CAND_CLASH: s->st.clashes++; continue;
        case CAND_EMBED: s->st.embed_failed++; continue;
        case CAND_UNCONVERGED: s->st.not_converged++; continue;
        case CAND_FAILED: s->st.failed++; continue;
        case CAND_BONDING: s->st.rejected_bonding++; continue;
        case CAND_STEREO: s->st.rejected_stereo++; continue;
        case CAND_DOUBLE: s->st.rejected_double_bond++; continue;
        case CAND_FATAL:
            if (status == ND_OK) {
                if (err)
                    *err = s->berr[i];
                status = s->berr[i].code ? (int)s->berr[i].code : ND_ECOMPUTE;
            }
            continue;
        default: break;
        }
        const double *x = s->bx + (size_t)i * s->stride;
        int d = find_duplicate(s, x, s->be[i]);
        if (d >= 0) {
            s->st.duplicates++;
            if (s->be[i] < s->pe[d]) { /* keep the lower copy */
                memcpy(s->px + (size_t)d * s->stride, x, s->stride * sizeof *x);
                s->pe[d] = s->be[i];
            }
            continue;
        }
        int r = pool_add(s, x, s->be[i], id, err);
        if (r != ND_OK)
            return r;
    }
    s->st.batches++;
    s->st.minima = s->npool;
    if (status != ND_OK)
        return status;
    double emin = INFINITY;
    for (int i = 0; i < s->npool; i++)
        if (s->pe[i] < emin)
            emin = s->pe[i];
    for (int i = first_new; i < s->npool; i++) {
        if (s->opt.window < 0 || s->pe[i] - emin <= s->opt.window)
            added_low = 1;
        if (s->opt.window < 0 || s->pe[i] - emin <= s->opt.window + EXPLORE_SLACK) {
            int r = queue_follow_ups(s, i, err);
            if (r != ND_OK)
                return r;
        }
    }
    if (added_low)
        s->st.quiet = 0;
    else if (first >= s->sys_total && !queued_at_start)
        s->st.quiet++;
    if (s->sys_total > 0 && s->st.tried >= s->sys_total)
        s->st.systematic = 1;
    if (s->rigid)
        s->st.stop = ND_SEARCH_RIGID;
    else if (s->st.tried >= s->opt.max_tries)
        s->st.stop = ND_SEARCH_BUDGET;
    else if (s->st.tried >= s->sys_total && s->st.quiet >= s->opt.quiet_rounds)
        s->st.stop = ND_SEARCH_QUIET;
    if (s->st.stop != ND_SEARCH_RUNNING) {
        s->sampling_done = 1;
        return ND_OK;
    }
    return ND_CONTINUE;
}

/* What the finishing steps made of one minimum. */
typedef struct {
    int status;          /* CAND_OK, CAND_BONDING (changed), CAND_UNCONVERGED (not a minimum),
                            CAND_FATAL */
    double energy, gcorr, lowest;
    int repaired, checked;
    long calls, hcalls;
    nd_error err;
} finish_item;

/* Tight minimisation, normal-mode check and repair, structure check and
 * (optionally) thermochemistry of the structure x (overwritten). The
 * energy at the final structure is evaluated afterwards for all minima at
 * once (nd_energy_batch). */
static void finish_one(const nd_search *s, double *x, finish_item *it)
{
    it->status = CAND_OK;
    it->gcorr = NAN;
    it->lowest = NAN;
    nd_error_clear(&it->err);
    if (s->opt.check_modes) {
        nd_minimize_options tight = s->opt.relax;
        nd_converge_preset_modes(&tight.stop);
        nd_minimize_result res;
        memset(&res, 0, sizeof res);
        int r = nd_minimize(s->opt.method, &s->pot, s->n, x, &tight, &res, &it->err);
        it->calls += res.force_calls;
        if (r != ND_OK && r != ND_CONTINUE) {
            it->status = r == ND_ECOMPUTE ? CAND_UNCONVERGED : CAND_FATAL;
            return;
        }
        nd_molecule m2;
        nd_molecule_init(&m2);
        if (nd_molecule_copy(&m2, &s->mol, &it->err) != ND_OK) {
            it->status = CAND_FATAL;
            return;
        }
        memcpy(m2.xyz, x, s->stride * sizeof *x);
        nd_repair_opts ro;
        memset(&ro, 0, sizeof ro);
        ro.method = s->opt.method;
        nd_modes modes;
        memset(&modes, 0, sizeof modes);
        nd_check chk;
        nd_repair_result rr;
        memset(&rr, 0, sizeof rr);
        r = nd_repair_run(&s->pot, &m2, NULL, &ro, &modes, &chk, &rr, &it->err);
        it->calls += rr.force_calls;
        it->hcalls += (long)rr.hessians * 6 * s->n;
        if (r != ND_OK) {
            it->status = r == ND_ECOMPUTE ? CAND_UNCONVERGED : CAND_FATAL;
            nd_modes_free(&modes);
            nd_molecule_free(&m2);
            return;
        }
        memcpy(x, m2.xyz, s->stride * sizeof *x);
        it->checked = 1;
        it->repaired = rr.rounds > 0;
        it->lowest = chk.lowest;
        if (chk.verdict != ND_VERDICT_MINIMUM)
            it->status = CAND_UNCONVERGED;
        if (it->status == CAND_OK && s->opt.free_energy) {
            double *mass = malloc((size_t)s->n * sizeof *mass);
            nd_thermo th;
            nd_thermo_opts to;
            memset(&to, 0, sizeof to);
            to.temperature = s->opt.temperature > 0 ? s->opt.temperature : 0;
            to.multiplicity = s->mol.multiplicity;
            if (!mass || nd_modes_masses(&s->mol, mass, &it->err) != ND_OK ||
                nd_thermo_compute(s->n, s->mol.z, mass, x, modes.linear, modes.freq, modes.nmodes,
                                  &to, &th, &it->err) != ND_OK)
                it->status = CAND_FATAL;
            else
                it->gcorr = th.g_total;
            free(mass);
        }
        nd_modes_free(&modes);
        nd_molecule_free(&m2);
        if (it->status != CAND_OK)
            return;
    }
    if (s->n > 1 && nd_verify_check(s->ver, x, NULL) != ND_VERIFY_OK)
        it->status = CAND_BONDING;
}

int nd_search_finish(nd_search *s, nd_error *err)
{
    if (s->finished)
        return ND_OK;
    if (s->npool == 0)
        return nd_fail(err, ND_ECOMPUTE,
                       "no minimum found: %ld candidates tried, %ld clashes, %ld not converged, "
                       "%ld potential failures, %ld changed bonding, %ld inverted stereo",
                       s->st.tried, s->st.clashes, s->st.not_converged, s->st.failed,
                       s->st.rejected_bonding, s->st.rejected_stereo);
    int *order = malloc((size_t)s->npool * sizeof *order);
    if (!order)
        return nd_fail(err, ND_ENOMEM, "out of memory ranking conformers");
    nd_rank_order(s->npool, s->pe, order);
    double e0 = s->pe[order[0]];
    int nc = 0;
    int cap = s->npool;
    if (s->opt.max_conformers > 0) {
        int c = (s->opt.free_energy ? 3 : 2) * s->opt.max_conformers + 4;
        if (c < cap)
            cap = c;
    }
    while (nc < cap && (s->opt.window < 0 || s->pe[order[nc]] - e0 <= s->opt.window + FINISH_SLACK))
        nc++;
    double *fx = malloc((size_t)nc * s->stride * sizeof *fx);
    finish_item *items = calloc((size_t)nc, sizeof *items);
    int *keep = malloc((size_t)nc * sizeof *keep);
    double *key = malloc((size_t)nc * sizeof *key);
    int *alive = malloc((size_t)nc * sizeof *alive);
    if (!fx || !items || !keep || !key || !alive) {
        free(order);
        free(fx);
        free(items);
        free(keep);
        free(key);
        free(alive);
        return nd_fail(err, ND_ENOMEM, "out of memory ranking conformers");
    }
    for (int c = 0; c < nc; c++)
        memcpy(fx + (size_t)c * s->stride, s->px + (size_t)order[c] * s->stride,
               s->stride * sizeof *fx);
    const nd_search *cs = s;
#pragma omp parallel for schedule(dynamic)
    for (int c = 0; c < nc; c++)
        finish_one(cs, fx + (size_t)c * s->stride, &items[c]);

    /* energies of the finished structures in one batch call (one large
     * evaluation for a potential with a batch call) */
    {
        double *fe = malloc((size_t)(nc > 0 ? nc : 1) * sizeof *fe);
        if (!fe) {
            free(order);
            free(fx);
            free(items);
            free(keep);
            free(key);
            free(alive);
            return nd_fail(err, ND_ENOMEM, "out of memory ranking conformers");
        }
        int r = nd_energy_batch(&s->pot, s->n, nc, fx, fe, NULL);
        s->st.check_force_calls += nc;
        for (int c = 0; c < nc; c++) {
            finish_item *it = &items[c];
            if (it->status != CAND_OK)
                continue;
            if (r != ND_OK && r != ND_ECOMPUTE) { /* the program failed: stop */
                it->status = CAND_FATAL;
                nd_fail(&it->err, r, "energies of the checked minima failed");
            } else if (r != ND_OK || !isfinite(fe[c])) {
                /* one structure failed: evaluate it alone to see which */
                double e;
                int q = s->pot.fn(s->pot.ctx, s->n, fx + (size_t)c * s->stride, &e, NULL);
                if (q == ND_OK && isfinite(e))
                    it->energy = e;
                else
                    it->status = CAND_UNCONVERGED;
            } else {
                it->energy = fe[c];
            }
        }
        free(fe);
    }
    int status = ND_OK, nalive = 0;
    for (int c = 0; c < nc; c++) {
        finish_item *it = &items[c];
        s->st.check_force_calls += it->calls;
        s->st.hessian_calls += it->hcalls;
        if (it->checked)
            s->st.checked++;
        if (it->status == CAND_FATAL) {
            if (status == ND_OK) {
                if (err)
                    *err = it->err;
                status = it->err.code ? (int)it->err.code : ND_ECOMPUTE;
            }
            continue;
        }
        if (it->status == CAND_UNCONVERGED) {
            s->st.not_minimum++;
            continue;
        }
        if (it->status == CAND_BONDING) {
            s->st.changed_in_check++;
            continue;
        }
        if (it->repaired)
            s->st.repaired++;
        alive[nalive++] = c;
    }
    if (status != ND_OK)
        goto out;
    /* deduplicate again among the survivors, lowest energy first */
    {
        double *ae = malloc((size_t)(nalive > 0 ? nalive : 1) * sizeof *ae);
        int *ord = malloc((size_t)(nalive > 0 ? nalive : 1) * sizeof *ord);
        int *kept = malloc((size_t)(nalive > 0 ? nalive : 1) * sizeof *kept);
        if (!ae || !ord || !kept) {
            free(ae);
            free(ord);
            free(kept);
            status = nd_fail(err, ND_ENOMEM, "out of memory ranking conformers");
            goto out;
        }
        for (int q = 0; q < nalive; q++)
            ae[q] = items[alive[q]].energy;
        nd_rank_order(nalive, ae, ord);
        int nk = 0;
        for (int r = 0; r < nalive; r++) {
            int c = alive[ord[r]], dup = 0;
            for (int q = 0; q < nk && !dup; q++) {
                int k = kept[q];
                if (fabs(items[c].energy - items[k].energy) <= s->opt.dedup.energy_tol &&
                    nd_dedup_rmsd(s->dd, fx + (size_t)k * s->stride, fx + (size_t)c * s->stride,
                                  NULL) < s->opt.dedup.rmsd)
                    dup = 1;
            }
            if (dup)
                s->st.merged_in_check++;
            else
                kept[nk++] = c;
        }
        nalive = nk;
        memcpy(alive, kept, (size_t)nk * sizeof *kept);
        free(ae);
        free(ord);
        free(kept);
    }
    if (nalive == 0) {
        status = nd_fail(err, ND_ECOMPUTE,
                         "no verified minimum: of %d minima checked by normal modes, %d still had "
                         "imaginary modes after repair and %d changed their bonds or stereo while "
                         "being repaired; the potential may be unsuited to this molecule",
                         s->st.checked, s->st.not_minimum, s->st.changed_in_check);
        goto out;
    }
    for (int q = 0; q < nalive; q++) {
        const finish_item *it = &items[alive[q]];
        key[q] = s->opt.free_energy ? it->energy + it->gcorr : it->energy;
    }
    int nsel = nd_rank_select(nalive, key, s->opt.window, s->opt.max_conformers, keep);
    s->conf = calloc((size_t)nsel, sizeof *s->conf);
    s->cx = malloc((size_t)nsel * s->stride * sizeof *s->cx);
    double *w = malloc((size_t)nsel * sizeof *w), *sk = malloc((size_t)nsel * sizeof *sk);
    if (!s->conf || !s->cx || !w || !sk) {
        free(w);
        free(sk);
        status = nd_fail(err, ND_ENOMEM, "out of memory ranking conformers");
        goto out;
    }
    double emin = INFINITY, gmin = INFINITY;
    for (int r = 0; r < nsel; r++) {
        const finish_item *it = &items[alive[keep[r]]];
        sk[r] = key[keep[r]];
        if (it->energy < emin)
            emin = it->energy;
        if (s->opt.free_energy && it->energy + it->gcorr < gmin)
            gmin = it->energy + it->gcorr;
    }
    nd_rank_boltzmann(nsel, sk, s->opt.temperature, w, NULL);
    int ref = 0;
    for (int r = 0; r < nsel; r++) {
        int c = alive[keep[r]];
        const finish_item *it = &items[c];
        nd_conformer *cf = &s->conf[r];
        memcpy(s->cx + (size_t)r * s->stride, fx + (size_t)c * s->stride, s->stride * sizeof *fx);
        cf->xyz = s->cx + (size_t)r * s->stride;
        cf->energy = it->energy;
        cf->rel_energy = it->energy - emin;
        if (it->energy == emin)
            ref = r;
        cf->free_energy = s->opt.free_energy ? it->energy + it->gcorr : (double)NAN;
        cf->rel_free_energy = s->opt.free_energy ? cf->free_energy - gmin : (double)NAN;
        cf->weight = w[r];
        cf->lowest_freq = it->lowest;
        cf->checked = it->checked;
        cf->repaired = it->repaired;
        cf->uncertainty = NAN;
        cf->found_at = s->pfound[order[c]];
    }
    free(w);
    free(sk);
    /* mirror-image pairs: kept as two conformers (both are populated, the
     * weights count both), but named, so a reader does not take them for
     * two different shapes */
    for (int r = 0; r < nsel; r++) {
        nd_conformer *cf = &s->conf[r];
        cf->mirror_of = -1;
        for (int q = 0; q < r && cf->mirror_of < 0; q++) {
            if (s->conf[q].mirror_of >= 0 ||
                fabs(s->conf[q].energy - cf->energy) > s->opt.dedup.energy_tol)
                continue;
            double d = nd_dedup_mirror_rmsd(s->dd, s->conf[q].xyz, cf->xyz);
            if (d >= 0 && d < s->opt.dedup.rmsd)
                cf->mirror_of = q;
        }
    }
    s->nconf = nsel;
    s->st.reported = nsel;
    if (s->opt.members && s->opt.members_k > 0) {
        int K = s->opt.members_k;
        double *me = malloc((size_t)nsel * (size_t)K * sizeof *me);
        double *sig = malloc((size_t)nsel * sizeof *sig);
        int r = me && sig ? s->opt.members(s->opt.members_ctx, s->n, nsel, s->cx, me)
                          : ND_ENOMEM;
        if (r == ND_OK) {
            nd_rank_relative_spread(nsel, K, me, ref, sig);
            for (int q = 0; q < nsel; q++) {
                s->conf[q].uncertainty = sig[q];
                s->conf[q].uncertain = sig[q] > s->opt.uncertainty_mark;
            }
        } else {
            status = nd_fail(err, r, "ensemble energies of the conformers failed");
        }
        free(me);
        free(sig);
    }
    s->finished = status == ND_OK;
out:
    free(order);
    free(fx);
    free(items);
    free(keep);
    free(key);
    free(alive);
    return status;
}

const nd_search_counts *nd_search_stats(const nd_search *s) { return &s->st; }
int nd_search_count(const nd_search *s) { return s->nconf; }

const nd_conformer *nd_search_conformer(const nd_search *s, int rank)
{
    return rank >= 0 && rank < s->nconf ? &s->conf[rank] : NULL;
}

int nd_search_minima(const nd_search *s) { return s->npool; }

const double *nd_search_minimum(const nd_search *s, int i, double *energy)
{
    if (i < 0 || i >= s->npool)
        return NULL;
    if (energy)
        *energy = s->pe[i];
    return s->px + (size_t)i * s->stride;
}

const double *nd_search_start(const nd_search *s) { return s->start; }
const nd_molecule *nd_search_molecule(const nd_search *s) { return &s->mol; }
