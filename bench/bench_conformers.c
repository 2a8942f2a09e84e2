/* Conformer search benchmark: a drug-like molecule with eleven rotatable
 * bonds (an invented amide ether, counted by nd_topology_rotatable_bonds)
 * searched on the analytic bonded potential of tests/lib/analytic.h (no
 * learned model is bundled yet). Prints wall time, force calls (sampling,
 * final minimisations, Hessians), distinct minima found, minima per 1,000
 * force calls, and whether every reported conformer was confirmed a
 * minimum; then the same shorter search at 1 and 2 threads side by side
 * (medians of 3 runs) with the speed-up and a bit-for-bit comparison. */
#include "conformers/search.h"
#include "conformers/topology.h"
#include "core/progress.h"
#include "core/smiles.h"
#include "tests/lib/analytic.h"

#include <math.h>
#include <omp.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

static const char *SMILES = "COc1ccc(CCNC(=O)C(C)Oc2ccc(CC(C)C)cc2)cc1OC";

typedef struct {
    double seconds;
    long calls_sampling, calls_final, calls_hessian;
    int minima, reported, confirmed;
    double e0;
    double *first; /* coordinates of the lowest conformer (malloc'd) */
} run_result;

/* One whole search with max_tries candidates at nthreads threads. */
static int run(const nd_molecule *m, const nd_energy *pot, int max_tries, int nthreads,
               run_result *r)
{
    nd_search_options o;
    nd_search_options_default(&o);
    o.max_tries = max_tries;
    omp_set_num_threads(nthreads);
    nd_error err;
    nd_search *s;
    double t0 = nd_progress_clock();
    int st = nd_search_new(&s, m, pot, &o, &err);
    if (st == ND_OK) {
        while ((st = nd_search_step(s, &err)) == ND_CONTINUE)
            ;
        if (st == ND_OK)
            st = nd_search_finish(s, &err);
    }
    r->seconds = nd_progress_clock() - t0;
    if (st != ND_OK) {
        fprintf(stderr, "search failed: %s\n", err.msg);
        nd_search_free(s);
        return st;
    }
    const nd_search_counts *c = nd_search_stats(s);
    r->calls_sampling = c->force_calls;
    r->calls_final = c->check_force_calls;
    r->calls_hessian = c->hessian_calls;
    r->minima = c->minima;
    r->reported = nd_search_count(s);
    r->confirmed = 0;
    for (int i = 0; i < r->reported; i++)
        r->confirmed += nd_search_conformer(s, i)->checked;
    r->e0 = nd_search_conformer(s, 0)->energy;
    r->first = malloc(3 * (size_t)m->natoms * sizeof *r->first);
    memcpy(r->first, nd_search_conformer(s, 0)->xyz, 3 * (size_t)m->natoms * sizeof *r->first);
    nd_search_free(s);
    return ND_OK;
}

static int cmp_double(const void *a, const void *b)
{
    double x = *(const double *)a, y = *(const double *)b;
    return (x > y) - (x < y);
}

int main(void)
{
    nd_molecule m;
    nd_molecule_init(&m);
    nd_error err;
    if (nd_smiles_parse(SMILES, &m, &err) != ND_OK) {
        fprintf(stderr, "%s\n", err.msg);
        return 1;
    }
    nd_topology t;
    memset(&t, 0, sizeof t);
    nd_topology_build(&m, &t, NULL);
    int nrot = nd_topology_rotatable_bonds(&t, &m, NULL);
    nd_topology_free(&t);
    nd_test_bonded *b;
    if (nd_test_bonded_new(&b, &m, &err) != ND_OK)
        return 1;
    nd_energy pot = {nd_test_bonded_energy, NULL, b};
    printf("molecule %s: %d atoms, %d rotatable bonds; analytic bonded potential\n\n", SMILES,
           m.natoms, nrot);

    run_result full;
    if (run(&m, &pot, 2000, 2, &full) != ND_OK)
        return 1;
    long total = full.calls_sampling + full.calls_final + full.calls_hessian;
    printf("full search (budget 2000 candidates, 2 threads):\n");
    printf("  wall time              %8.2f s  (goal: under 60 s on 2 cores)\n", full.seconds);
    printf("  force calls            %8ld  (sampling %ld, final minimisations %ld, Hessians %ld)\n",
           total, full.calls_sampling, full.calls_final, full.calls_hessian);
    printf("  distinct minima found  %8d\n", full.minima);
    printf("  minima per 1000 calls  %8.2f  (sampling calls only: %.2f)\n",
           1000.0 * full.minima / (double)total, 1000.0 * full.minima / (double)full.calls_sampling);
    printf("  conformers reported    %8d, confirmed minima by the normal-mode check: %d\n\n",
           full.reported, full.confirmed);
    free(full.first);

    enum { REPS = 3, TRIES = 160 };
    double t1[REPS], t2[REPS];
    int same = 1;
    for (int k = 0; k < REPS; k++) {
        run_result a, c;
        if (run(&m, &pot, TRIES, 1, &a) != ND_OK || run(&m, &pot, TRIES, 2, &c) != ND_OK)
            return 1;
        t1[k] = a.seconds;
        t2[k] = c.seconds;
        same &= a.reported == c.reported && a.e0 == c.e0 &&
                memcmp(a.first, c.first, 3 * (size_t)m.natoms * sizeof *a.first) == 0;
        free(a.first);
        free(c.first);
    }
    qsort(t1, REPS, sizeof *t1, cmp_double);
    qsort(t2, REPS, sizeof *t2, cmp_double);
    printf("short search (budget %d), medians of %d runs:\n", TRIES, REPS);
    printf("  1 thread  %8.3f s\n  2 threads %8.3f s   speed-up %.2f\n", t1[REPS / 2], t2[REPS / 2],
           t1[REPS / 2] / t2[REPS / 2]);
    printf("  same output at 1 and 2 threads: %s\n", same ? "yes" : "NO");
    nd_test_bonded_free(b);
    nd_molecule_free(&m);
    return same ? 0 : 1;
}
