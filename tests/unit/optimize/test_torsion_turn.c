/* Rigid turns about a bond (optimize/torsion_turn.c): the side found over
 * the bond table, ring bonds refused, and turned torsions landing on their
 * target (measured by nd_coords_torsion) with every distance within each
 * side unchanged. */
#include "tests/lib/testutil.h"

#include "core/molecule.h"
#include "optimize/coords.h"
#include "optimize/torsion_turn.h"
#include "tests/lib/analytic.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

/* A test molecule, its neighbour lists and room for a side's marks. */
typedef struct graph {
    nd_molecule m;
    int *start, *adj;
    unsigned char *mv;
} graph;

static void build(const char *name, graph *g)
{
    nd_error err;
    int i = 0;
    while (i < nd_test_molecule_count() && strcmp(nd_test_molecule_name(i), name) != 0)
        i++;
    assert_true(i < nd_test_molecule_count());
    nd_molecule_init(&g->m);
    assert_int_equal(nd_test_molecule_build(i, &g->m, &err), ND_OK);
    assert_int_equal(nd_molecule_neighbours(&g->m, &g->start, &g->adj, &err), ND_OK);
    g->mv = calloc((size_t)g->m.natoms, 1);
    assert_non_null(g->mv);
}

static void release(graph *g)
{
    free(g->mv);
    free(g->start);
    free(g->adj);
    nd_molecule_free(&g->m);
}

static double torsion_deg(const double *x, int i, int j, int k, int l)
{
    int ok;
    double t = nd_coords_torsion(x + 3 * i, x + 3 * j, x + 3 * k, x + 3 * l, NULL, &ok);
    assert_true(ok);
    return t * 180 / M_PI;
}

static double dist(const double *x, int a, int b)
{
    return nd_coords_distance(x + 3 * a, x + 3 * b, NULL);
}

/* hexane C0-C5: the bond C1-C2 splits 2 + 4 carbons; the smaller side
 * (C0, C1 and their 5 hydrogens) moves */
static void test_side_chain(void **state)
{
    (void)state;
    graph g;
    build("hexane", &g);
    int n = g.m.natoms;
    unsigned char *mv = g.mv;
    int sign = nd_torsion_side(n, g.start, g.adj, 2, 1, mv);
    assert_int_equal(sign, 1); /* k = C1's side is the smaller */
    int count = 0;
    for (int a = 0; a < n; a++)
        count += mv[a];
    assert_int_equal(count, 2 + 5);
    assert_true(mv[0] && mv[1] && !mv[2] && !mv[5]);
    assert_int_equal(nd_torsion_side(n, g.start, g.adj, 1, 2, mv), -1); /* the same side, now j's */
    assert_true(mv[0] && mv[1] && !mv[2]);
    assert_int_equal(nd_torsion_side(n, g.start, g.adj, 0, 2, mv), 0); /* not bonded */
    for (int a = 0; a < n; a++)
        assert_int_equal(mv[a], 0);
    release(&g);
}

static void test_ring_refused(void **state)
{
    (void)state;
    graph g;
    build("cyclohexane", &g);
    assert_int_equal(nd_torsion_side(g.m.natoms, g.start, g.adj, 0, 1, g.mv), 0);
    for (int a = 0; a < g.m.natoms; a++)
        assert_int_equal(g.mv[a], 0);
    release(&g);
}

/* Turns torsion I-J-K-L of molecule name to a series of targets, moving
 * whichever side nd_torsion_side picks, from a perturbed start. */
static void turn_to_targets(const char *name, int i, int j, int k, int l)
{
    graph g;
    build(name, &g);
    nd_molecule m = g.m;
    int n = m.natoms;
    nd_test_perturb(n, m.xyz, 0.05, 4242);
    unsigned char *mv = g.mv;
    int sign = nd_torsion_side(n, g.start, g.adj, j, k, mv);
    assert_true(sign != 0);
    double *x0 = malloc(sizeof(double) * 3 * (size_t)n);
    memcpy(x0, m.xyz, sizeof(double) * 3 * (size_t)n);
    const double targets[] = {-179.0, -120.5, -60.0, 0.0, 33.3, 90.0, 150.0, 180.0};
    for (size_t t = 0; t < sizeof targets / sizeof targets[0]; t++) {
        double delta = targets[t] - torsion_deg(m.xyz, i, j, k, l);
        delta -= 360 * floor((delta + 180) / 360);
        nd_torsion_turn(n, m.xyz, mv, j, k, sign * delta * M_PI / 180);
        double got = torsion_deg(m.xyz, i, j, k, l), diff = got - targets[t];
        diff -= 360 * floor((diff + 180) / 360);
        assert_true(fabs(diff) < 1e-9);
        /* rigid: distances within each side, and from the axis atoms, kept */
        for (int a = 0; a < n; a++)
            for (int b = a + 1; b < n; b++) {
                int same = mv[a] == mv[b] || a == j || a == k || b == j || b == k;
                if (same)
                    assert_true(fabs(dist(m.xyz, a, b) - dist(x0, a, b)) < 1e-10);
            }
    }
    free(x0);
    release(&g);
}

static void test_turn_chain(void **state)
{
    (void)state;
    turn_to_targets("hexane", 0, 1, 2, 3); /* the smaller side is j's: sign -1 */
    turn_to_targets("hexane", 1, 2, 3, 4);
}

/* ethanol's C-O: k = O's side is its hydrogen alone */
static void test_turn_hydroxyl(void **state)
{
    (void)state;
    graph g;
    build("ethanol", &g);
    int h = -1;
    for (int p = g.start[2]; p < g.start[3]; p++)
        if (g.m.z[g.adj[p]] == 1)
            h = g.adj[p];
    assert_true(h >= 0);
    release(&g);
    turn_to_targets("ethanol", 0, 1, 2, h);
}

static void test_turn_degenerate_axis(void **state)
{
    (void)state;
    double x[9] = {0, 0, 0, 0, 0, 0, 1, 1, 1}; /* j and k coincide */
    unsigned char mv[3] = {0, 0, 1};
    nd_torsion_turn(3, x, mv, 0, 1, 1.0);
    assert_true(x[6] == 1 && x[7] == 1 && x[8] == 1);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_side_chain),
        cmocka_unit_test(test_ring_refused),
        cmocka_unit_test(test_turn_chain),
        cmocka_unit_test(test_turn_hydroxyl),
        cmocka_unit_test(test_turn_degenerate_axis),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
