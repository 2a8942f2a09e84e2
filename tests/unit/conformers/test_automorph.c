/* Graph automorphisms: counts for molecules whose symmetry groups are known
 * from their structure (group orders are elementary combinatorics: e.g. a
 * methyl group's three hydrogens can be permuted in 3! = 6 ways). */
#include "tests/lib/testutil.h"

#include "conformers/automorph.h"
#include "core/molecule.h"

#include <stdlib.h>

static int atom(nd_molecule *m, int z)
{
    nd_molecule_add_atom(m, z, 0.0, 0.0, 0.0, NULL);
    return m->natoms - 1;
}

static void bond(nd_molecule *m, int a, int b, int order)
{
    assert_int_equal(nd_molecule_add_bond(m, a, b, order, NULL), ND_OK);
}

/* Carbon with hydrogens attached. */
static int ch(nd_molecule *m, int nh)
{
    int c = atom(m, 6);
    for (int i = 0; i < nh; i++)
        bond(m, c, atom(m, 1), 1);
    return c;
}

static int count(const nd_molecule *m, int heavy_only, int cap, int *complete)
{
    int *keep = NULL;
    if (heavy_only) {
        keep = malloc((size_t)m->natoms * sizeof *keep);
        for (int i = 0; i < m->natoms; i++)
            keep[i] = m->z[i] != 1;
    }
    nd_automorphs a;
    assert_int_equal(nd_automorphs_find(m, keep, cap, &a, NULL), ND_OK);
    for (int i = 0; i < m->natoms; i++) /* the identity comes first */
        assert_int_equal(a.perm[i], i);
    for (int k = 0; k < a.count; k++) /* each permutation maps subgraph bonds onto bonds */
        for (int b = 0; b < m->nbonds; b++) {
            if (keep && (!keep[m->bonds[b].a] || !keep[m->bonds[b].b]))
                continue; /* only bonds inside the subgraph are mapped */
            int x = a.perm[k * m->natoms + m->bonds[b].a], y = a.perm[k * m->natoms + m->bonds[b].b];
            int found = 0;
            for (int c = 0; c < m->nbonds; c++)
                found |= (m->bonds[c].a == x && m->bonds[c].b == y) || (m->bonds[c].a == y && m->bonds[c].b == x);
            assert_true(found);
        }
    int n = a.count;
    if (complete)
        *complete = a.complete;
    nd_automorphs_free(&a);
    free(keep);
    return n;
}

static void test_methane_ethane(void **state)
{
    (void)state;
    nd_molecule m;
    nd_molecule_init(&m);
    ch(&m, 4);
    assert_int_equal(count(&m, 0, 1000, NULL), 24); /* 4! */
    assert_int_equal(count(&m, 1, 1000, NULL), 1);
    nd_molecule_free(&m);

    int a = ch(&m, 3), b = ch(&m, 3);
    bond(&m, a, b, 1);
    assert_int_equal(count(&m, 0, 1000, NULL), 72); /* 2 x 3! x 3! */
    assert_int_equal(count(&m, 1, 1000, NULL), 2);
    nd_molecule_free(&m);
}

/* tert-Butanol heavy atoms: the three methyl carbons permute (3! = 6);
 * with hydrogens 3! x (3!)^3 = 1296. */
static void test_tert_butyl(void **state)
{
    (void)state;
    nd_molecule m;
    nd_molecule_init(&m);
    int c = ch(&m, 0);
    for (int i = 0; i < 3; i++)
        bond(&m, c, ch(&m, 3), 1);
    int o = atom(&m, 8);
    bond(&m, c, o, 1);
    bond(&m, o, atom(&m, 1), 1);
    assert_int_equal(count(&m, 1, 10000, NULL), 6);
    assert_int_equal(count(&m, 0, 10000, NULL), 1296);
    int complete = 1;
    assert_int_equal(count(&m, 0, 100, &complete), 100); /* the cap is honoured and reported */
    assert_int_equal(complete, 0);
    nd_molecule_free(&m);
}

/* Kekule benzene: bonds of a flat ring count as one order (the two Kekule
 * forms are one molecule), so all 12 ring permutations of the hexagon's
 * dihedral group are found, not only the 6 that map the stored double bonds
 * onto double bonds. Acetate: the two oxygens only swap
 * when the bond orders agree, so a neutral Kekule acetic acid has 1, and a
 * carboxylate drawn with two single C-O bonds and charge split has 2. */
static void test_rings_and_orders(void **state)
{
    (void)state;
    nd_molecule m;
    nd_molecule_init(&m);
    int r[6];
    for (int i = 0; i < 6; i++)
        r[i] = ch(&m, 1);
    for (int i = 0; i < 6; i++)
        bond(&m, r[i], r[(i + 1) % 6], i % 2 ? 1 : 2);
    assert_int_equal(count(&m, 1, 1000, NULL), 12);
    nd_molecule_free(&m);

    for (int i = 0; i < 6; i++)
        r[i] = ch(&m, 2);
    for (int i = 0; i < 6; i++)
        bond(&m, r[i], r[(i + 1) % 6], 1);
    assert_int_equal(count(&m, 1, 1000, NULL), 12); /* cyclohexane ring: dihedral group of order 12 */
    nd_molecule_free(&m);

    int me = ch(&m, 3), cc = ch(&m, 0), o1 = atom(&m, 8), o2 = atom(&m, 8);
    bond(&m, me, cc, 1);
    bond(&m, cc, o1, 2);
    bond(&m, cc, o2, 1);
    bond(&m, o2, atom(&m, 1), 1);
    assert_int_equal(count(&m, 1, 1000, NULL), 1);
    nd_molecule_free(&m);

    me = ch(&m, 3);
    cc = ch(&m, 0);
    o1 = atom(&m, 8);
    o2 = atom(&m, 8);
    bond(&m, me, cc, 1);
    bond(&m, cc, o1, 1);
    bond(&m, cc, o2, 1);
    m.formal_charge[o1] = m.formal_charge[o2] = 0;
    assert_int_equal(count(&m, 1, 1000, NULL), 2);
    m.formal_charge[o1] = -1; /* different charges: no swap */
    assert_int_equal(count(&m, 1, 1000, NULL), 1);
    nd_molecule_free(&m);
}

static void test_errors(void **state)
{
    (void)state;
    nd_molecule m;
    nd_molecule_init(&m);
    atom(&m, 6);
    atom(&m, 8);
    nd_automorphs a;
    nd_error err;
    assert_int_equal(nd_automorphs_find(&m, NULL, 10, &a, &err), ND_EINPUT);
    assert_contains(err.msg, "bond table");
    nd_molecule_free(&m);
    atom(&m, 7); /* a single atom needs no bonds */
    assert_int_equal(nd_automorphs_find(&m, NULL, 10, &a, &err), ND_OK);
    assert_int_equal(a.count, 1);
    nd_automorphs_free(&a);
    nd_automorphs_free(NULL);
    nd_molecule_free(&m);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_methane_ethane), cmocka_unit_test(test_tert_butyl),
        cmocka_unit_test(test_rings_and_orders), cmocka_unit_test(test_errors),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
