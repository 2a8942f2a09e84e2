/* Duplicate removal: symmetric copies merge, true conformers stay apart. */
#include "tests/lib/testutil.h"

#include "conformers/dedup.h"
#include "conformers/rmsd.h"

#include <math.h>
#include <string.h>

/* 1,2-dichloroethane heavy atoms Cl0-C1-C2-Cl3 with hydrogens on the
 * carbons (H4,H5 on C1; H6,H7 on C2), at Cl-C-C-Cl dihedral phi. Bond
 * lengths 1.79 (C-Cl), 1.53 (C-C), Cl-C-C angles 109.5 and angle2 degrees
 * (typical values, from memory; the test needs only a consistent geometry,
 * and unequal angles make it asymmetric, so that only the atom permutation
 * can superpose a renumbered copy). */
static void dichloroethane(nd_molecule *m, double phi_deg, double angle2_deg, double *x)
{
    nd_molecule_init(m);
    const int z[8] = {17, 6, 6, 17, 1, 1, 1, 1};
    for (int i = 0; i < 8; i++)
        nd_molecule_add_atom(m, z[i], 0, 0, 0, NULL);
    nd_molecule_add_bond(m, 0, 1, 1, NULL);
    nd_molecule_add_bond(m, 1, 2, 1, NULL);
    nd_molecule_add_bond(m, 2, 3, 1, NULL);
    nd_molecule_add_bond(m, 1, 4, 1, NULL);
    nd_molecule_add_bond(m, 1, 5, 1, NULL);
    nd_molecule_add_bond(m, 2, 6, 1, NULL);
    nd_molecule_add_bond(m, 2, 7, 1, NULL);
    double th = (180.0 - 109.5) * M_PI / 180.0, th2 = (180.0 - angle2_deg) * M_PI / 180.0;
    double phi = phi_deg * M_PI / 180.0;
    double p[8][3] = {
        {-1.79 * cos(th) - 0.765, 1.79 * sin(th), 0},
        {-0.765, 0, 0},
        {0.765, 0, 0},
        {0.765 + 1.79 * cos(th2), 1.79 * sin(th2) * cos(phi), 1.79 * sin(th2) * sin(phi)},
        {-1.1, -0.5, 0.9}, {-1.1, -0.5, -0.9}, {1.1, -0.5, 0.9}, {1.1, -0.5, -0.9},
    };
    memcpy(x, p, sizeof p);
    memcpy(m->xyz, p, sizeof p);
}

static void test_symmetric_copy_merges(void **state)
{
    (void)state;
    nd_molecule m;
    double anti[24], gauche[24], gauche_minus[24], swapped[24];
    dichloroethane(&m, 168.0, 121.0, anti);
    nd_molecule_free(&m);
    dichloroethane(&m, -65.0, 109.5, gauche_minus);
    nd_molecule_free(&m);
    dichloroethane(&m, 65.0, 109.5, gauche);
    /* The same anti structure with the atoms renumbered by the molecule's
     * own symmetry (Cl0<->Cl3, C1<->C2, H4..7 following) and turned. */
    const int perm[8] = {3, 2, 1, 0, 6, 7, 4, 5};
    double rot[9] = {0.36, 0.48, -0.8, -0.8, 0.6, 0.0, 0.48, 0.64, 0.6}, t[3] = {2.5, -1.0, 0.125};
    for (int i = 0; i < 8; i++)
        memcpy(swapped + 3 * i, anti + 3 * perm[i], 3 * sizeof(double));
    nd_rmsd_apply(8, swapped, rot, t);

    nd_dedup *d;
    nd_dedup_options opt = nd_dedup_defaults();
    assert_int_equal(nd_dedup_new(&m, &opt, &d, NULL), ND_OK);
    int complete = 0;
    assert_int_equal(nd_dedup_symmetry_count(d, &complete), 2); /* identity and the end-to-end swap */
    assert_int_equal(complete, 1);
    int idx[4] = {0, 1, 2, 3};
    assert_true(nd_rmsd_subset(4, idx, anti, swapped, NULL) > 0.1); /* naive RMSD sees a difference */
    assert_true(nd_dedup_rmsd(d, anti, swapped, NULL) < 1e-6);
    assert_true(nd_dedup_rmsd(d, anti, gauche, NULL) > 0.5);
    assert_true(nd_dedup_rmsd(d, gauche, gauche_minus, NULL) > 0.3); /* mirror images stay distinct */
    /* ... but are recognised as mirror images (heavy atoms: the hydrogens
     * of this sketch are not mirrored), also after renumbering and turning;
     * a gauche form is not its own mirror image */
    assert_true(nd_dedup_mirror_rmsd(d, gauche, gauche_minus) < 1e-6);
    double turned[24];
    for (int i = 0; i < 8; i++)
        memcpy(turned + 3 * i, gauche_minus + 3 * perm[i], 3 * sizeof(double));
    nd_rmsd_apply(8, turned, rot, t);
    assert_true(nd_dedup_mirror_rmsd(d, gauche, turned) < 1e-6);
    assert_true(nd_dedup_mirror_rmsd(d, gauche, gauche) > 0.3);

    double all[5 * 24], e[5] = {-3.25, -2.5, -3.25 + 0.01, -2.5, -2.5 + 0.5};
    memcpy(all, anti, sizeof anti);
    memcpy(all + 24, gauche, sizeof gauche);
    memcpy(all + 48, swapped, sizeof swapped);
    memcpy(all + 72, gauche_minus, sizeof gauche_minus);
    memcpy(all + 96, gauche, sizeof gauche); /* same shape, energy far off: kept apart */
    int keep[5];
    assert_int_equal(nd_dedup_mark(d, 5, all, e, keep), 4);
    assert_int_equal(keep[0], -1);
    assert_int_equal(keep[2], 0);
    assert_int_equal(keep[1], -1);
    assert_int_equal(keep[3], -1);
    assert_int_equal(keep[4], -1);
    nd_dedup_free(d);
    nd_dedup_free(NULL);
    nd_molecule_free(&m);
}

int main(void)
{
    const struct CMUnitTest tests[] = {cmocka_unit_test(test_symmetric_copy_merges)};
    return cmocka_run_group_tests(tests, NULL, NULL);
}
