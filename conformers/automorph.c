/* Automorphism enumeration by colour refinement and backtracking.
 *
 * Atoms start with a colour from (element, formal charge, number of
 * neighbours, hydrogen count, in-subgraph); colours are refined by the
 * sorted multiset of (neighbour colour, bond order) until stable (the
 * classical 1-dimensional Weisfeiler-Leman refinement). The search then
 * maps atoms in breadth-first order, trying only candidates of the same
 * colour whose already-mapped neighbours correspond through bonds of the
 * same order. Refinement is a necessary condition only, so every full
 * mapping is checked edge by edge before it is accepted.
 *
 * Bonds of flat (aromatic and similar conjugated) rings all count as one
 * order, so the two Kekule forms of a ring are the same graph: otherwise a
 * phenyl ring flip, a symmetry of the molecule, would be missed because the
 * stored Kekule pattern is not symmetric under it. */
#include "conformers/automorph.h"

#include "conformers/topology.h"

#include <stdint.h>
#include <stdlib.h>
#include <string.h>

typedef struct {
    int n;
    const int *start, *adj; /* CSR neighbour lists */
    int *order_of;          /* bond order per adjacency entry */
    const int *keep;
    uint64_t *colour;
    int *seq;       /* atoms of the subgraph in BFS order */
    int nseq;
    int *map, *used;
    int max_count, count;
    int *out;       /* max_count * n */
    int stopped;
} search_state;

static uint64_t mix(uint64_t h, uint64_t v)
{
    h ^= v + 0x9e3779b97f4a7c15ULL + (h << 6) + (h >> 2);
    return h * 0xff51afd7ed558ccdULL;
}

static int cmp_u64(const void *a, const void *b)
{
    uint64_t x = *(const uint64_t *)a, y = *(const uint64_t *)b;
    return (x > y) - (x < y);
}

static int bond_order_between(const search_state *s, int i, int j)
{
    for (int p = s->start[i]; p < s->start[i + 1]; p++)
        if (s->adj[p] == j)
            return s->order_of[p];
    return 0;
}

/* Number of distinct colours among the subgraph atoms. */
static int count_colours(const search_state *s, uint64_t *scratch)
{
    int k = 0;
    for (int i = 0; i < s->n; i++)
        if (!s->keep || s->keep[i])
            scratch[k++] = s->colour[i];
    qsort(scratch, (size_t)k, sizeof *scratch, cmp_u64);
    int distinct = 0;
    for (int i = 0; i < k; i++)
        if (i == 0 || scratch[i] != scratch[i - 1])
            distinct++;
    return distinct;
}

static int refine(search_state *s, const nd_molecule *m)
{
    int n = s->n;
    uint64_t *next = malloc((size_t)n * sizeof *next);
    uint64_t *buf = malloc(((size_t)n + 1) * sizeof *buf);
    if (!next || !buf) {
        free(next);
        free(buf);
        return ND_ENOMEM;
    }
    for (int i = 0; i < n; i++) {
        int nh = 0;
        for (int p = s->start[i]; p < s->start[i + 1]; p++)
            nh += m->z[s->adj[p]] == 1;
        uint64_t h = mix(0, (uint64_t)m->z[i]);
        h = mix(h, (uint64_t)(m->formal_charge[i] + 16));
        h = mix(h, (uint64_t)(s->start[i + 1] - s->start[i]));
        h = mix(h, (uint64_t)nh);
        h = mix(h, (uint64_t)(!s->keep || s->keep[i]));
        h = mix(h, (uint64_t)(m->isotope[i]));
        s->colour[i] = h;
    }
    int classes = count_colours(s, buf);
    for (int round = 0; round < n + 1; round++) {
        for (int i = 0; i < n; i++) {
            int k = 0;
            for (int p = s->start[i]; p < s->start[i + 1]; p++)
                buf[k++] = mix(s->colour[s->adj[p]], (uint64_t)s->order_of[p]);
            qsort(buf, (size_t)k, sizeof *buf, cmp_u64);
            uint64_t h = mix(s->colour[i], 0x51ed27ULL);
            for (int q = 0; q < k; q++)
                h = mix(h, buf[q]);
            next[i] = h;
        }
        memcpy(s->colour, next, (size_t)n * sizeof *next);
        int c = count_colours(s, buf);
        if (c == classes)
            break;
        classes = c;
    }
    free(next);
    free(buf);
    return ND_OK;
}

/* Full check that map preserves every bond of the subgraph with its order. */
static int mapping_valid(const search_state *s)
{
    for (int i = 0; i < s->n; i++) {
        if (s->keep && !s->keep[i])
            continue;
        for (int p = s->start[i]; p < s->start[i + 1]; p++) {
            int j = s->adj[p];
            if (s->keep && !s->keep[j])
                continue;
            if (bond_order_between(s, s->map[i], s->map[j]) != s->order_of[p])
                return 0;
        }
    }
    return 1;
}

static void backtrack(search_state *s, int depth)
{
    if (s->stopped)
        return;
    if (depth == s->nseq) {
        if (!mapping_valid(s))
            return;
        if (s->count == s->max_count) {
            s->stopped = 1;
            return;
        }
        memcpy(s->out + (size_t)s->count * (size_t)s->n, s->map, (size_t)s->n * sizeof *s->map);
        s->count++;
        return;
    }
    int a = s->seq[depth];
    /* Try a's own image first so the identity is found first. */
    for (int pass = 0; pass < 2; pass++)
        for (int c = 0; c < s->n; c++) {
            if ((pass == 0) != (c == a))
                continue;
            if (s->used[c] || s->colour[c] != s->colour[a] || (s->keep && !s->keep[c]))
                continue;
            int ok = 1;
            for (int p = s->start[a]; p < s->start[a + 1] && ok; p++) {
                int nb = s->adj[p];
                if (s->keep && !s->keep[nb])
                    continue;
                if (s->map[nb] >= 0 && bond_order_between(s, c, s->map[nb]) != s->order_of[p])
                    ok = 0;
            }
            if (!ok)
                continue;
            s->map[a] = c;
            s->used[c] = 1;
            backtrack(s, depth + 1);
            s->map[a] = -1;
            s->used[c] = 0;
            if (s->stopped)
                return;
        }
}

int nd_automorphs_find(const nd_molecule *m, const int *keep, int max_count, nd_automorphs *out,
                       nd_error *err)
{
    memset(out, 0, sizeof *out);
    int n = m->natoms;
    if (n > 1 && m->nbonds == 0)
        return nd_fail(err, ND_EINPUT, "symmetry classes need a bond table (none for %d atoms)", n);
    if (max_count < 1)
        max_count = 1;
    search_state s = {0};
    int *start = NULL, *adj = NULL;
    int status = nd_molecule_neighbours(m, &start, &adj, err);
    if (status != ND_OK)
        return status;
    s.n = n;
    s.start = start;
    s.adj = adj;
    s.keep = keep;
    s.max_count = max_count;
    s.order_of = malloc(((size_t)start[n] + 1) * sizeof *s.order_of);
    s.colour = malloc(((size_t)n + 1) * sizeof *s.colour);
    s.seq = malloc(((size_t)n + 1) * sizeof *s.seq);
    s.map = malloc(((size_t)n + 1) * sizeof *s.map);
    s.used = calloc((size_t)n + 1, sizeof *s.used);
    s.out = malloc((size_t)max_count * ((size_t)n + 1) * sizeof *s.out);
    int *seen = calloc((size_t)n + 1, sizeof *seen);
    if (!s.order_of || !s.colour || !s.seq || !s.map || !s.used || !s.out || !seen) {
        status = nd_fail(err, ND_ENOMEM, "out of memory finding symmetry-equivalent atoms");
        goto done;
    }
    nd_topology topo = {0};
    int have_topo = n > 0 && nd_topology_build(m, &topo, NULL) == ND_OK;
    for (int i = 0; i < n; i++)
        for (int p = start[i]; p < start[i + 1]; p++) {
            int j = adj[p], order = 0;
            for (int b = 0; b < m->nbonds && !order; b++)
                if ((m->bonds[b].a == i && m->bonds[b].b == j) || (m->bonds[b].a == j && m->bonds[b].b == i))
                    order = (have_topo && topo.bond_flat[b] >= 0) ? ND_BOND_AROMATIC : m->bonds[b].order;
            s.order_of[p] = order;
        }
    nd_topology_free(&topo);
    if (refine(&s, m) != ND_OK) {
        status = nd_fail(err, ND_ENOMEM, "out of memory finding symmetry-equivalent atoms");
        goto done;
    }
    /* BFS order over each connected component of the subgraph, so that
     * neighbours constrain candidates as early as possible. */
    for (int root = 0; root < n; root++) {
        if (seen[root] || (keep && !keep[root]))
            continue;
        int head = s.nseq;
        s.seq[s.nseq++] = root;
        seen[root] = 1;
        while (head < s.nseq) {
            int a = s.seq[head++];
            for (int p = start[a]; p < start[a + 1]; p++) {
                int b = adj[p];
                if (!seen[b] && (!keep || keep[b])) {
                    seen[b] = 1;
                    s.seq[s.nseq++] = b;
                }
            }
        }
    }
    for (int i = 0; i < n; i++)
        s.map[i] = (keep && !keep[i]) ? i : -1;
    backtrack(&s, 0);
    out->natoms = n;
    out->count = s.count;
    out->complete = !s.stopped;
    out->perm = s.out;
    s.out = NULL;
done:
    free(s.order_of);
    free(s.colour);
    free(s.seq);
    free(s.map);
    free(s.used);
    free(s.out);
    free(seen);
    free(start);
    free(adj);
    return status;
}

void nd_automorphs_free(nd_automorphs *a)
{
    if (!a)
        return;
    free(a->perm);
    a->perm = NULL;
    a->count = 0;
}
