/* Topology: SSSR rings, ring bonds, parts, hybridisation, flat rings,
 * rotatable bonds and stereocentres, on molecules whose ring counts are
 * textbook facts (from memory: naphthalene two 6-rings, norbornane two
 * 5-rings, cubane five 4-rings, adamantane three 6-rings). */
#include "tests/lib/testutil.h"

#include "conformers/topology.h"
#include "core/smiles.h"

#include <stdio.h>
#include <stdlib.h>
#include <string.h>

static void build(const char *smi, nd_molecule *m, nd_topology *t)
{
    nd_error err;
    if (nd_smiles_parse(smi, m, &err) != ND_OK)
        fail_msg("%s: %s", smi, err.msg);
    if (nd_topology_build(m, t, &err) != ND_OK)
        fail_msg("%s: %s", smi, err.msg);
}

/* Sorted ring sizes as a string "5,5". */
static void ring_sizes(const nd_topology *t, char *buf, size_t size)
{
    int s[64], n = t->nrings < 64 ? t->nrings : 64;
    for (int r = 0; r < n; r++)
        s[r] = t->ring_start[r + 1] - t->ring_start[r];
    for (int i = 1; i < n; i++)
        for (int j = i; j > 0 && s[j - 1] > s[j]; j--) {
            int x = s[j];
            s[j] = s[j - 1];
            s[j - 1] = x;
        }
    buf[0] = '\0';
    size_t len = 0;
    for (int r = 0; r < n && len + 4 < size; r++)
        len += (size_t)snprintf(buf + len, size - len, r ? ",%d" : "%d", s[r]);
}

static void test_sssr(void **state)
{
    (void)state;
    static const struct {
        const char *smi, *sizes;
    } cases[] = {
        {"CCO", ""},
        {"c1ccccc1", "6"},
        {"c1ccc2ccccc2c1", "6,6"},
        {"C1CC2CCC1C2", "5,5"},                    /* norbornane */
        {"C12C3C4C1C5C2C3C45", "4,4,4,4,4"},       /* cubane */
        {"C1C2CC3CC1CC(C2)C3", "6,6,6"},           /* adamantane */
        {"C1CC11CC1", "3,3"},                      /* spiropentane */
        {"c1ccc(cc1)-c1ccccc1", "6,6"},            /* biphenyl */
        {"C1CCCCCCCCCCCCCCCCC1", "18"},
        {"c1ccc2c(c1)ccc1ccccc12", "6,6,6"},       /* phenanthrene */
        {"c1cc2ccc3cccc4ccc(c1)c2c34", "6,6,6,6"}, /* pyrene */
        {"C1CC2CCC1CC2", "6,6"},                   /* bicyclo[2.2.2]octane: two of the three 6-rings */
        {"c1ccc2[nH]ccc2c1", "5,6"},               /* indole */
    };
    for (size_t k = 0; k < sizeof cases / sizeof cases[0]; k++) {
        nd_molecule m;
        nd_topology t;
        nd_molecule_init(&m);
        build(cases[k].smi, &m, &t);
        char buf[128];
        ring_sizes(&t, buf, sizeof buf);
        if (strcmp(buf, cases[k].sizes) != 0)
            fail_msg("%s: rings %s, expected %s", cases[k].smi, buf, cases[k].sizes);
        assert_int_equal(t.nrings, m.nbonds - m.natoms + t.ncomponents);
        /* every ring is a cycle of bonded atoms */
        for (int r = 0; r < t.nrings; r++) {
            int s = t.ring_start[r], len = t.ring_start[r + 1] - s;
            for (int q = 0; q < len; q++)
                assert_true(nd_topology_bond(&t, t.ring_atoms[s + q], t.ring_atoms[s + (q + 1) % len]) >= 0);
        }
        nd_topology_free(&t);
        nd_molecule_free(&m);
    }
}

static void test_parts_and_ring_bonds(void **state)
{
    (void)state;
    nd_molecule m;
    nd_topology t;
    nd_molecule_init(&m);
    build("[Na+].[O-]C(=O)c1ccccc1", &m, &t);
    assert_int_equal(t.ncomponents, 2);
    assert_int_equal(t.component[0], 0);
    assert_int_equal(t.component[1], 1);
    /* the carboxylate C-C(ring) bond is not a ring bond; ring C-C bonds are */
    int b = nd_topology_bond(&t, 2, 4);
    assert_true(b >= 0);
    assert_int_equal(t.bond_in_ring[b], 0);
    b = nd_topology_bond(&t, 4, 5);
    assert_int_equal(t.bond_in_ring[b], 1);
    assert_int_equal(t.bond_rings[b], 1);
    assert_int_equal(nd_topology_bond_ring(&t, b), 6);
    assert_int_equal(nd_topology_angle_ring(&t, 4, 5, 6), 6);
    assert_int_equal(nd_topology_angle_ring(&t, 2, 4, 5), 0);
    nd_topology_free(&t);
    nd_molecule_free(&m);
    /* naphthalene fusion bond lies in both rings */
    nd_molecule_init(&m);
    build("c1ccc2ccccc2c1", &m, &t);
    b = nd_topology_bond(&t, 3, 8);
    assert_true(b >= 0);
    assert_int_equal(t.bond_rings[b], 2);
    assert_int_equal(t.atom_rings[3], 2);
    assert_int_equal(t.atom_rings[0], 1);
    nd_topology_free(&t);
    nd_molecule_free(&m);
}

/* Hybridisation and flat rings, by the usual textbook assignments: sp3
 * alkanes, sp2 alkenes and carbonyls, sp alkynes and nitriles, planar
 * amide N, tetrahedral sulfone S; benzene, pyridine and thiophene flat,
 * cyclohexane, cyclohexene and cyclooctatetraene (tub-shaped) not. */
static void test_hybridisation(void **state)
{
    (void)state;
    nd_molecule m;
    nd_topology t;
    nd_molecule_init(&m);
    build("CC=CC#N", &m, &t);
    assert_int_equal(t.hyb[0], ND_HYB_SP3); /* methyl: four neighbours */
    assert_int_equal(t.hyb[1], ND_HYB_SP2);
    assert_int_equal(t.hyb[2], ND_HYB_SP2);
    assert_int_equal(t.hyb[3], ND_HYB_SP);
    nd_topology_free(&t);
    build("CC(=O)NC", &m, &t);
    assert_int_equal(t.hyb[1], ND_HYB_SP2);
    assert_int_equal(t.hyb[3], ND_HYB_SP2); /* amide N, conjugated */
    assert_int_equal(t.hyb[4], ND_HYB_SP3);
    nd_topology_free(&t);
    build("CS(=O)(=O)C", &m, &t);
    assert_int_equal(t.hyb[1], ND_HYB_SP3);
    nd_topology_free(&t);
    build("C=C=C", &m, &t);
    assert_int_equal(t.hyb[1], ND_HYB_SP);
    nd_topology_free(&t);
    static const struct {
        const char *smi;
        int flat;
    } rings[] = {
        {"c1ccccc1", 1}, {"c1ccncc1", 1}, {"c1ccsc1", 1}, {"c1cc[nH]c1", 1}, {"O=c1cc[nH]cc1", 1},
        {"C1CCCCC1", 0}, {"C1=CCCCC1", 0}, {"C1=CC=CC=CC=C1", 0}, {"C1=CCC=C1", 0},
    };
    for (size_t k = 0; k < sizeof rings / sizeof rings[0]; k++) {
        build(rings[k].smi, &m, &t);
        assert_int_equal(t.nrings, 1);
        if (t.ring_flat[0] != rings[k].flat)
            fail_msg("%s: flat %d, expected %d", rings[k].smi, t.ring_flat[0], rings[k].flat);
        if (rings[k].flat)
            for (int q = t.ring_start[0]; q < t.ring_start[1]; q++)
                assert_int_equal(t.hyb[t.ring_atoms[q]], ND_HYB_SP2);
        nd_topology_free(&t);
    }
    nd_molecule_free(&m);
}

/* Rotatable bonds: single, outside rings, a heavy atom beyond each end, no
 * linear end (common practice, no source). */
static void test_rotatable(void **state)
{
    (void)state;
    static const struct {
        const char *smi;
        int count;
    } cases[] = {
        {"CC", 0}, {"CCCC", 1}, {"CCCCC", 2}, {"c1ccccc1C", 0}, {"c1ccc(cc1)-c1ccccc1", 1},
        {"c1ccccc1C#Cc1ccccc1", 0}, {"C1CCCCC1", 0}, {"CC(=O)OC", 1}, {"CCC(=O)OCC", 3}, {"CC(C)(C)C", 0},
    };
    for (size_t k = 0; k < sizeof cases / sizeof cases[0]; k++) {
        nd_molecule m;
        nd_topology t;
        nd_molecule_init(&m);
        build(cases[k].smi, &m, &t);
        int *out = malloc((size_t)m.nbonds * sizeof *out + 1);
        int c = nd_topology_rotatable_bonds(&t, &m, out);
        if (c != cases[k].count)
            fail_msg("%s: %d rotatable bonds, expected %d", cases[k].smi, c, cases[k].count);
        for (int q = 0; q < c; q++)
            assert_true(nd_topology_is_rotatable(&t, &m, out[q]));
        free(out);
        nd_topology_free(&t);
        nd_molecule_free(&m);
    }
}

static void test_stereo_and_errors(void **state)
{
    (void)state;
    nd_molecule m;
    nd_topology t;
    nd_molecule_init(&m);
    build("C[C@@H](O)[C@H](N)C(=O)O.F/C=C/F", &m, &t);
    int atoms[8], bonds[8], na = 0, nb = 0;
    nd_topology_stereo(&m, atoms, &na, bonds, &nb);
    assert_int_equal(na, 2);
    assert_int_equal(atoms[0], 1);
    assert_int_equal(atoms[1], 3);
    assert_int_equal(nb, 1);
    assert_int_equal(m.bonds[bonds[0]].order, ND_BOND_DOUBLE);
    nd_topology_free(&t);
    /* a bond to an atom outside the molecule */
    m.bonds[0].b = m.natoms + 3;
    nd_error err;
    assert_int_equal(nd_topology_build(&m, &t, &err), ND_EINPUT);
    assert_contains(err.msg, "outside");
    nd_topology_free(&t);
    nd_topology_free(NULL);
    nd_molecule_free(&m);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_sssr),         cmocka_unit_test(test_parts_and_ring_bonds),
        cmocka_unit_test(test_hybridisation), cmocka_unit_test(test_rotatable),
        cmocka_unit_test(test_stereo_and_errors),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
