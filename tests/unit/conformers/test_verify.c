/* Structure checks: bonds, tetrahedral configurations and double bonds
 * that change are caught; unchanged structures pass; bond perception. */
#include "tests/lib/testutil.h"

#include "conformers/embed.h"
#include "conformers/verify.h"
#include "core/smiles.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

/* Parses smiles and embeds it (seed 11, start 0). */
static void build(const char *smiles, nd_molecule *m)
{
    nd_error err;
    nd_molecule_init(m);
    assert_int_equal(nd_smiles_parse(smiles, m, &err), ND_OK);
    assert_int_equal(nd_embed_molecule(m, 11, 0, NULL, &err), ND_OK);
}

static void test_unchanged_passes(void **state)
{
    (void)state;
    nd_molecule m;
    build("C[C@H](N)C(=O)OC/C=C/C", &m);
    nd_verify *v;
    nd_error err;
    assert_int_equal(nd_verify_new(&m, m.xyz, &v, &err), ND_OK);
    int atom = 7;
    assert_int_equal(nd_verify_check(v, m.xyz, &atom), ND_VERIFY_OK);
    assert_int_equal(atom, -1);
    assert_true(nd_verify_centres(v) >= 2);       /* the stated centre and the CH3/CH2 carbons */
    assert_int_equal(nd_verify_double_bonds(v), 1); /* C=C outside rings; C=O has no far neighbour */
    nd_verify_free(v);
    nd_molecule_free(&m);
}

static void test_broken_and_formed_bonds(void **state)
{
    (void)state;
    nd_molecule m;
    build("CCCCO", &m);
    nd_verify *v;
    assert_int_equal(nd_verify_new(&m, m.xyz, &v, NULL), ND_OK);
    double *x = malloc(3 * (size_t)m.natoms * sizeof *x);
    /* stretch the C0-C1 bond to 1.53 + 1.0 angstrom by moving atom 0 away */
    memcpy(x, m.xyz, 3 * (size_t)m.natoms * sizeof *x);
    double d[3], len = 0;
    for (int k = 0; k < 3; k++) {
        d[k] = x[k] - x[3 + k];
        len += d[k] * d[k];
    }
    len = sqrt(len);
    for (int k = 0; k < 3; k++)
        x[k] += d[k] / len * 1.0;
    int atom;
    assert_int_equal(nd_verify_check(v, x, &atom), ND_VERIFY_BONDING);
    assert_true(atom >= 0);
    /* put the oxygen 1.2 angstrom from carbon 0: a new bond */
    memcpy(x, m.xyz, 3 * (size_t)m.natoms * sizeof *x);
    for (int k = 0; k < 3; k++)
        x[12 + k] = x[k] + (k == 0 ? 1.2 : 0.0);
    assert_int_equal(nd_verify_check(v, x, NULL), ND_VERIFY_BONDING);
    free(x);
    nd_verify_free(v);
    nd_molecule_free(&m);
}

static void test_mirror_inverts_stereo(void **state)
{
    (void)state;
    nd_molecule m;
    build("N[C@@H](C)C(=O)O", &m);
    nd_verify *v;
    assert_int_equal(nd_verify_new(&m, NULL, &v, NULL), ND_OK); /* stated centre only */
    assert_int_equal(nd_verify_centres(v), 1);
    assert_int_equal(nd_verify_check(v, m.xyz, NULL), ND_VERIFY_OK);
    double *x = malloc(3 * (size_t)m.natoms * sizeof *x);
    for (int i = 0; i < 3 * m.natoms; i++)
        x[i] = (i % 3 == 0) ? -m.xyz[i] : m.xyz[i];
    int atom;
    assert_int_equal(nd_verify_check(v, x, &atom), ND_VERIFY_STEREO);
    assert_int_equal(atom, 1);
    free(x);
    nd_verify_free(v);
    nd_molecule_free(&m);
}

/* Turning the substituents of one end of a double bond by 180 degrees
 * about the bond axis swaps cis and trans and keeps every bond length and
 * tetrahedral configuration; the check names the double bond. */
static void test_double_bond_isomerised(void **state)
{
    (void)state;
    nd_molecule m;
    build("C/C=C/C", &m);
    int b = -1;
    for (int k = 0; k < m.nbonds; k++)
        if (m.bonds[k].order == ND_BOND_DOUBLE)
            b = k;
    assert_true(b >= 0);
    assert_int_equal(m.bonds[b].a + m.bonds[b].b, 3); /* atoms 1 and 2 */
    assert_int_equal(nd_verify_double_bond_config(&m, b, m.xyz), ND_DB_TRANS);
    nd_verify *v;
    assert_int_equal(nd_verify_new(&m, m.xyz, &v, NULL), ND_OK);
    double *x = malloc(3 * (size_t)m.natoms * sizeof *x);
    memcpy(x, m.xyz, 3 * (size_t)m.natoms * sizeof *x);
    /* atoms on atom 1's side: atom 0, its hydrogens, atom 1's hydrogen */
    unsigned char moving[32] = {0};
    moving[0] = 1;
    for (int k = 0; k < m.nbonds; k++) {
        int p = m.bonds[k].a, q = m.bonds[k].b;
        if ((p == 0 || p == 1) && m.z[q] == 1)
            moving[q] = 1;
        if ((q == 0 || q == 1) && m.z[p] == 1)
            moving[p] = 1;
    }
    double u[3], len = 0;
    for (int k = 0; k < 3; k++) {
        u[k] = m.xyz[6 + k] - m.xyz[3 + k];
        len += u[k] * u[k];
    }
    for (int k = 0; k < 3; k++)
        u[k] /= sqrt(len);
    for (int i = 0; i < m.natoms; i++) {
        if (!moving[i])
            continue;
        double r[3], t = 0;
        for (int k = 0; k < 3; k++) {
            r[k] = m.xyz[3 * i + k] - m.xyz[3 + k];
            t += r[k] * u[k];
        }
        for (int k = 0; k < 3; k++) /* half turn about the axis through atom 1 */
            x[3 * i + k] = m.xyz[3 + k] + 2 * t * u[k] - r[k];
    }
    assert_int_equal(nd_verify_double_bond_config(&m, b, x), ND_DB_CIS);
    int atom;
    assert_int_equal(nd_verify_check(v, x, &atom), ND_VERIFY_DOUBLE_BOND);
    assert_int_equal(atom, 1);
    free(x);
    nd_verify_free(v);
    nd_molecule_free(&m);
}

static void test_perceive_matches_table(void **state)
{
    (void)state;
    nd_molecule m, p;
    build("OCC1CCC(N)CC1", &m);
    nd_molecule_init(&p);
    nd_error err;
    assert_int_equal(nd_molecule_copy(&p, &m, &err), ND_OK);
    p.nbonds = 0;
    p.has_bonds = 0;
    assert_int_equal(nd_verify_perceive_bonds(&p, &err), ND_OK);
    assert_int_equal(p.nbonds, m.nbonds);
    assert_true(p.has_bonds);
    for (int b = 0; b < m.nbonds; b++) {
        int found = 0;
        for (int q = 0; q < p.nbonds; q++)
            if ((p.bonds[q].a == m.bonds[b].a && p.bonds[q].b == m.bonds[b].b) ||
                (p.bonds[q].a == m.bonds[b].b && p.bonds[q].b == m.bonds[b].a))
                found = 1;
        assert_true(found);
    }
    nd_molecule_free(&p);
    nd_molecule_free(&m);
}

static void test_errors(void **state)
{
    (void)state;
    nd_molecule m;
    nd_molecule_init(&m);
    nd_molecule_add_atom(&m, 6, 0, 0, 0, NULL);
    nd_molecule_add_atom(&m, 8, 1.2, 0, 0, NULL);
    nd_verify *v = (nd_verify *)&m;
    nd_error err;
    assert_int_equal(nd_verify_new(&m, m.xyz, &v, &err), ND_EINPUT);
    assert_null(v);
    assert_contains(err.msg, "bond table");
    nd_molecule_add_atom(&m, 0, 3, 0, 0, NULL); /* no element: no radius */
    m.z[2] = 0;
    assert_int_equal(nd_verify_perceive_bonds(&m, &err), ND_EINPUT);
    assert_contains(err.msg, "atom 3");
    assert_string_equal(nd_verify_name(ND_VERIFY_STEREO), "stereocentre inverted");
    nd_verify_free(NULL);
    nd_molecule_free(&m);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_unchanged_passes),
        cmocka_unit_test(test_broken_and_formed_bonds),
        cmocka_unit_test(test_mirror_inverts_stereo),
        cmocka_unit_test(test_double_bond_isomerised),
        cmocka_unit_test(test_perceive_matches_table),
        cmocka_unit_test(test_errors),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
