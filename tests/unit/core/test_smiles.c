/* SMILES reader and writer: atoms, hydrogens, kekulisation, charges,
 * isotopes, stereo, errors with columns, and round trips. The rules checked
 * are those of the OpenSMILES specification (opensmiles.org), cited by
 * section beside each check. */
#include "tests/lib/testutil.h"

#include "core/elements.h"
#include "core/molecule.h"
#include "core/rng.h"
#include "core/smiles.h"

#include <limits.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

static void parse_ok(const char *smi, nd_molecule *m)
{
    nd_error err;
    nd_error_clear(&err);
    int rc = nd_smiles_parse(smi, m, &err);
    if (rc != ND_OK)
        fail_msg("%s: %s", smi, err.msg);
}

static int count_z(const nd_molecule *m, int z)
{
    int c = 0;
    for (int i = 0; i < m->natoms; i++)
        c += m->z[i] == z;
    return c;
}

/* Hydrogens bonded to atom i. */
static int h_on(const nd_molecule *m, int i)
{
    int c = 0;
    for (int b = 0; b < m->nbonds; b++) {
        int o = m->bonds[b].a == i ? m->bonds[b].b : m->bonds[b].b == i ? m->bonds[b].a : -1;
        if (o >= 0 && m->z[o] == 1)
            c++;
    }
    return c;
}

static int count_order(const nd_molecule *m, int order)
{
    int c = 0;
    for (int b = 0; b < m->nbonds; b++)
        c += m->bonds[b].order == order;
    return c;
}

/* Molecular formulas of well-known compounds (from memory of their
 * textbook formulas): benzene C6H6, caffeine C8H10N4O2, aspirin C9H8O4,
 * pyridine C5H5N, pyrrole C4H5N, ethanol C2H6O. Checks implicit hydrogens
 * from the normal valences (OpenSMILES, "Organic subset" and "Implicit
 * hydrogens") and that only the written text before whitespace is read. */
static void test_formulas(void **state)
{
    (void)state;
    static const struct {
        const char *smi, *formula;
    } cases[] = {
        {"c1ccccc1", "C6H6"},
        {"Cn1cnc2c1c(=O)n(C)c(=O)n2C", "C8H10N4O2"},
        {"CC(=O)Oc1ccccc1C(=O)O", "C9H8O4"},
        {"c1ccncc1", "C5H5N"},
        {"c1cc[nH]c1", "C4H5N"},
        {"CCO ethanol", "C2H6O"},
        {"S", "H2S"},
        {"P", "H3P"},
        {"B", "BH3"},
        {"[S]", "S"},
        {"CS(=O)(=O)C", "C2H6O2S"},   /* S valence 6: no H */
        {"ClC(Cl)Cl", "CHCl3"},
        {"[OH-]", "HO"},
        {"[NH4+]", "H4N"},
        {"O=C=O", "CO2"},
        {"c1ccc2ccccc2c1", "C10H8"},
        {"[2H]C([2H])([2H])[2H]", "CH4"},
    };
    for (size_t k = 0; k < sizeof cases / sizeof cases[0]; k++) {
        nd_molecule m;
        nd_molecule_init(&m);
        parse_ok(cases[k].smi, &m);
        char f[64];
        nd_molecule_formula(&m, f, sizeof f);
        if (strcmp(f, cases[k].formula) != 0)
            fail_msg("%s: formula %s, expected %s", cases[k].smi, f, cases[k].formula);
        assert_int_equal(m.dimension, 0);
        assert_int_equal(m.has_bonds, 1);
        nd_molecule_free(&m);
    }
}

/* Kekulisation (OpenSMILES, "Aromaticity"): every aromatic atom that needs
 * a double bond gets exactly one, none is aromatic afterwards. Benzene has
 * three double bonds, naphthalene five, pyrene eight, azulene five; in
 * pyrrole the [nH] keeps its hydrogen and gets none; pyridinium N+ takes
 * one. */
static void test_kekule(void **state)
{
    (void)state;
    static const struct {
        const char *smi;
        int doubles;
    } cases[] = {
        {"c1ccccc1", 3},          {"c1ccc2ccccc2c1", 5},      {"c1cc2ccc3cccc4ccc(c1)c2c34", 8},
        {"c1ccc2cccc2cc1", 5},    {"c1cc[nH]c1", 2},          {"c1ccoc1", 2},
        {"c1ccsc1", 2},           {"C[n+]1ccccc1", 3},        {"O=c1cc[nH]cc1", 3},
        {"c1nnn[nH]1", 2},        {"Cn1cnc2c1c(=O)n(C)c(=O)n2C", 4},
        {"c1ccccc1-c1ccccc1", 6}, {"c1ccccc1c1ccccc1", 6}, /* biphenyl without '-': not a ring bond */
        {"c1cc[cH-]c1", 2},       {"[cH+]1cccccc1", 3},
    };
    for (size_t k = 0; k < sizeof cases / sizeof cases[0]; k++) {
        nd_molecule m;
        nd_molecule_init(&m);
        parse_ok(cases[k].smi, &m);
        if (count_order(&m, ND_BOND_DOUBLE) != cases[k].doubles)
            fail_msg("%s: %d double bonds, expected %d", cases[k].smi, count_order(&m, ND_BOND_DOUBLE),
                     cases[k].doubles);
        assert_int_equal(count_order(&m, ND_BOND_AROMATIC), 0);
        /* no atom carries two double bonds */
        for (int i = 0; i < m.natoms; i++) {
            int d = 0;
            for (int b = 0; b < m.nbonds; b++)
                if (m.bonds[b].order == ND_BOND_DOUBLE && (m.bonds[b].a == i || m.bonds[b].b == i))
                    d++;
            assert_true(d <= 1);
        }
        nd_molecule_free(&m);
    }
    nd_molecule m;
    nd_molecule_init(&m);
    parse_ok("c1cc[nH]c1", &m);
    assert_int_equal(m.z[3], 7);
    assert_int_equal(h_on(&m, 3), 1);
    parse_ok("Cn1cccc1", &m); /* N-methylpyrrole: three bonds, no H */
    assert_int_equal(h_on(&m, 1), 0);
    assert_int_equal(count_z(&m, 1), 7);
    nd_molecule_free(&m);
}

/* Charges, isotopes, atom classes and hydrogens of bracket atoms
 * (OpenSMILES, "Atoms": [13CH4], [NH4+], [O-2], [Fe+3], [CH3:1]). */
static void test_bracket_atoms(void **state)
{
    (void)state;
    nd_molecule m;
    nd_molecule_init(&m);
    parse_ok("[13CH4]", &m);
    assert_int_equal(m.isotope[0], 13);
    assert_int_equal(m.natoms, 5);
    parse_ok("[NH4+].[O-2].[Fe+3]", &m);
    assert_int_equal(m.formal_charge[0], 1);
    assert_int_equal(m.formal_charge[1], -2);
    assert_int_equal(m.formal_charge[2], 3);
    assert_int_equal(m.charge, 2);
    parse_ok("[O--]", &m);
    assert_int_equal(m.formal_charge[0], -2);
    parse_ok("[Cu++]", &m);
    assert_int_equal(m.z[0], 29);
    assert_int_equal(m.formal_charge[0], 2);
    parse_ok("[CH3:1]C", &m);
    assert_int_equal(h_on(&m, 0), 3);
    assert_int_equal(h_on(&m, 1), 3);
    parse_ok("[se]1cccc1", &m);
    assert_int_equal(m.z[0], 34);
    parse_ok("[Sc]", &m); /* scandium, not S + aromatic c (two letters first) */
    assert_int_equal(m.z[0], 21);
    parse_ok("[H][H]", &m);
    assert_int_equal(m.natoms, 2);
    assert_int_equal(m.nbonds, 1);
    parse_ok("C%12CC%12", &m); /* %nn ring closure */
    assert_int_equal(m.nbonds, 3 + 6);
    parse_ok("C=1CC1", &m); /* bond order on the opening ring digit */
    assert_int_equal(count_order(&m, ND_BOND_DOUBLE), 1);
    parse_ok("C1CC=1", &m);
    assert_int_equal(count_order(&m, ND_BOND_DOUBLE), 1);
    parse_ok("C1.C1", &m); /* a ring bond across a dot joins the parts: ethane */
    assert_int_equal(m.natoms, 8);
    nd_molecule_free(&m);
}

/* The sign of the signed volume V(a, b, c) about centre i implied by the
 * molecule's chirality (molecule.h: the sign for the three lowest-index
 * neighbours), for any three neighbours a, b, c of i; d is the fourth
 * neighbour or -1 for a lone pair. Parity of the permutation between
 * (s3; s0, s1, s2) and (d; a, b, c), as in any tetrahedral bookkeeping. */
static int volume_sign(const nd_molecule *m, int i, int a, int b, int c, int d)
{
    int w[4] = {d < 0 ? INT_MAX : d, a, b, c}, s[4];
    memcpy(s, w, sizeof s);
    for (int p = 1; p < 4; p++)
        for (int q = p; q > 0 && s[q - 1] > s[q]; q--) {
            int t = s[q];
            s[q] = s[q - 1];
            s[q - 1] = t;
        }
    int ref[4] = {s[3], s[0], s[1], s[2]}, perm[4];
    for (int p = 0; p < 4; p++)
        for (int q = 0; q < 4; q++)
            if (w[q] == ref[p])
                perm[p] = q;
    int inv = 0;
    for (int p = 0; p < 4; p++)
        for (int q = p + 1; q < 4; q++)
            inv += perm[p] > perm[q];
    return (inv % 2 ? -1 : 1) * m->chirality[i];
}

/* First neighbour of i with atomic number z. */
static int nbr_z(const nd_molecule *m, int i, int z)
{
    for (int b = 0; b < m->nbonds; b++) {
        int o = m->bonds[b].a == i ? m->bonds[b].b : m->bonds[b].b == i ? m->bonds[b].a : -1;
        if (o >= 0 && m->z[o] == z)
            return o;
    }
    return -1;
}

static int chiral_atom(const nd_molecule *m)
{
    for (int i = 0; i < m->natoms; i++)
        if (m->chirality[i])
            return i;
    return -1;
}

/* Sign of V(N, Br, O) (C the fourth) at the centre of a SMILES whose
 * centre carries N, Br, O and one C. */
static int nbro_sign(const char *smi)
{
    nd_molecule m;
    nd_molecule_init(&m);
    parse_ok(smi, &m);
    int c = chiral_atom(&m);
    assert_true(c >= 0);
    int s = volume_sign(&m, c, nbr_z(&m, c, 7), nbr_z(&m, c, 35), nbr_z(&m, c, 8), nbr_z(&m, c, 6));
    nd_molecule_free(&m);
    return s;
}

/* Tetrahedral chirality (OpenSMILES, "Tetrahedral chirality"): the
 * specification's equivalent writings N[C@](Br)(O)C = Br[C@](O)(N)C =
 * O[C@](Br)(C)N = C[C@](Br)(N)O, and their enantiomer N[C@@](Br)(O)C; an
 * implicit H counts as the neighbour right after the preceding atom, first
 * when there is none; a ring-closure digit holds its written place. */
static void test_tetrahedral(void **state)
{
    (void)state;
    int ref = nbro_sign("N[C@](Br)(O)C");
    assert_true(ref == 1 || ref == -1);
    assert_int_equal(nbro_sign("Br[C@](O)(N)C"), ref);
    assert_int_equal(nbro_sign("O[C@](Br)(C)N"), ref);
    assert_int_equal(nbro_sign("C[C@](Br)(N)O"), ref);
    assert_int_equal(nbro_sign("[C@](C)(Br)(N)O"), ref);  /* same order as C[C@](Br)(N)O */
    assert_int_equal(nbro_sign("[C@](Br)(C)(N)O"), -ref); /* one swap */
    assert_int_equal(nbro_sign("N[C@@](Br)(O)C"), -ref);
    assert_int_equal(nbro_sign("N[C@TH1](Br)(O)C"), ref); /* @TH1 is @ */
    assert_int_equal(nbro_sign("N[C@TH2](Br)(O)C"), -ref);

    /* implicit H: N[C@@H](C)C(=O)O and C[C@@H](C(=O)O)N are both L-alanine
     * (they differ by an even permutation of (N, H, CH3, COOH)) */
    nd_molecule m1, m2;
    nd_molecule_init(&m1);
    nd_molecule_init(&m2);
    parse_ok("N[C@@H](C)C(=O)O", &m1);
    parse_ok("C[C@@H](C(=O)O)N", &m2);
    int c1 = 1, c2 = 1;
    int n1 = nbr_z(&m1, c1, 7), h1 = nbr_z(&m1, c1, 1), n2 = nbr_z(&m2, c2, 7), h2 = nbr_z(&m2, c2, 1);
    /* methyl = the C with three H; carboxyl the other */
    int me1 = 2, co1 = 3, me2 = 0, co2 = 2;
    assert_int_equal(volume_sign(&m1, c1, n1, me1, co1, h1), volume_sign(&m2, c2, n2, me2, co2, h2));
    parse_ok("[C@@H](N)(C)C(=O)O", &m2); /* H first: (H, N, CH3, COOH) is odd from (N, H, ...) */
    assert_int_equal(volume_sign(&m2, 0, 1, 2, 3, nbr_z(&m2, 0, 1)),
                     -volume_sign(&m1, c1, n1, me1, co1, h1));

    /* ring closure in its written place: in F[C@H]1CCCO1 the centre sees
     * (F, H, O, C); in F[C@H](O1)CCC1 also (F, H, O, C): same; with @@ the
     * enantiomer */
    parse_ok("F[C@H]1CCCO1", &m1);
    parse_ok("F[C@H](O1)CCC1", &m2);
    int s1 = volume_sign(&m1, 1, nbr_z(&m1, 1, 9), nbr_z(&m1, 1, 8), nbr_z(&m1, 1, 6), nbr_z(&m1, 1, 1));
    int s2 = volume_sign(&m2, 1, nbr_z(&m2, 1, 9), nbr_z(&m2, 1, 8), nbr_z(&m2, 1, 6), nbr_z(&m2, 1, 1));
    assert_int_equal(s1, s2);
    parse_ok("F[C@@H](O1)CCC1", &m2);
    s2 = volume_sign(&m2, 1, nbr_z(&m2, 1, 9), nbr_z(&m2, 1, 8), nbr_z(&m2, 1, 6), nbr_z(&m2, 1, 1));
    assert_int_equal(s1, -s2);

    /* a lone pair takes the implicit-H place (sulfoxide, three neighbours) */
    parse_ok("C[S@](=O)c1ccccc1", &m1);
    parse_ok("C[S@@](=O)c1ccccc1", &m2);
    assert_int_equal(m1.chirality[1], -m2.chirality[1]);
    assert_true(m1.chirality[1] != 0);
    nd_molecule_free(&m1);
    nd_molecule_free(&m2);
}

/* Lowest-index neighbour of a double-bond end x other than y. */
static int lowest_other(const nd_molecule *m, int x, int y)
{
    int best = -1;
    for (int b = 0; b < m->nbonds; b++) {
        int o = m->bonds[b].a == x ? m->bonds[b].b : m->bonds[b].b == x ? m->bonds[b].a : -1;
        if (o >= 0 && o != y && (best < 0 || o < best))
            best = o;
    }
    return best;
}

/* Configuration of the last double bond written in smi, stated for its
 * substituents of element z (else its first heavy substituents): 1 cis,
 * 2 trans, 0 none. */
static int config_of(const char *smi, int z)
{
    nd_molecule m;
    nd_molecule_init(&m);
    parse_ok(smi, &m);
    int cfg = -1;
    for (int b = 0; b < m.nbonds; b++) {
        const nd_bond *bd = &m.bonds[b];
        if (bd->order != ND_BOND_DOUBLE)
            continue;
        /* the substituent of each end: of element z if there is one, else
         * the first heavy atom other than the partner */
        int fa = -1, fb = -1, ha = -1, hb = -1;
        for (int q = 0; q < m.nbonds; q++) {
            const nd_bond *e = &m.bonds[q];
            int ends[2][2] = {{e->a, e->b}, {e->b, e->a}};
            for (int t = 0; t < 2; t++) {
                int x = ends[t][0], o = ends[t][1];
                if (x == bd->a && o != bd->b) {
                    if (m.z[o] == z) fa = o;
                    else if (m.z[o] != 1 && ha < 0) ha = o;
                }
                if (x == bd->b && o != bd->a) {
                    if (m.z[o] == z) fb = o;
                    else if (m.z[o] != 1 && hb < 0) hb = o;
                }
            }
        }
        if (fa < 0)
            fa = ha;
        if (fb < 0)
            fb = hb;
        if (bd->config == ND_DB_NONE || fa < 0 || fb < 0) {
            cfg = 0;
            continue;
        }
        int same = bd->config == ND_DB_CIS;
        if (lowest_other(&m, bd->a, bd->b) != fa)
            same = !same;
        if (lowest_other(&m, bd->b, bd->a) != fb)
            same = !same;
        cfg = same ? 1 : 2;
    }
    nd_molecule_free(&m);
    return cfg;
}

/* Cis/trans (OpenSMILES, "Cis/trans"): F/C=C/F and C(\F)=C/F are trans,
 * F/C=C\F and F\C=C/F cis; a mark on one end only states nothing; a
 * conjugated diene shares the middle mark. */
static void test_cis_trans(void **state)
{
    (void)state;
    assert_int_equal(config_of("F/C=C/F", 9), 2);
    assert_int_equal(config_of("F\\C=C\\F", 9), 2);
    assert_int_equal(config_of("C(\\F)=C/F", 9), 2);
    assert_int_equal(config_of("F/C=C\\F", 9), 1);
    assert_int_equal(config_of("F\\C=C/F", 9), 1);
    assert_int_equal(config_of("C(/F)=C/F", 9), 1);
    assert_int_equal(config_of("F/C=CF", 9), 0);
    assert_int_equal(config_of("F/C=C/C=C/F", 9), 2); /* both ends trans; last bond checked */
    assert_int_equal(config_of("F/C=C/C=C\\F", 9), 1);
    assert_int_equal(config_of("Cl/C(F)=C(/F)Cl", 17), 1); /* Cl below C1; F4 above, so Cl5 below */
    /* ring-closure marks: the bond written C/1 ... means atom/partner */
    assert_int_equal(config_of("F/C=C/1.F1", 9), 2);
    assert_int_equal(config_of("F/C=C\\1.F1", 9), 1);
}

/* The broken corpus: each line's SMILES must fail with ND_EINPUT naming
 * its column and containing its message fragment. */
static void test_broken_corpus(void **state)
{
    (void)state;
    FILE *f = fopen("tests/data/smiles/broken.smi", "r");
    assert_non_null(f);
    char line[512];
    int count = 0;
    while (fgets(line, sizeof line, f)) {
        if (line[0] == '#' || line[0] == '\n')
            continue;
        line[strcspn(line, "\n")] = '\0';
        char *t1 = strchr(line, '\t');
        assert_non_null(t1);
        *t1 = '\0';
        char *t2 = strchr(t1 + 1, '\t');
        assert_non_null(t2);
        *t2 = '\0';
        int col = atoi(t1 + 1);
        nd_molecule m;
        nd_molecule_init(&m);
        nd_error err;
        nd_error_clear(&err);
        int rc = nd_smiles_parse(line, &m, &err);
        if (rc != ND_EINPUT)
            fail_msg("'%s' gave %d, expected an input error", line, rc);
        char want[48];
        snprintf(want, sizeof want, "SMILES column %d: ", col);
        if (!strstr(err.msg, want) || !strstr(err.msg, t2 + 1))
            fail_msg("'%s': message \"%s\", expected column %d and \"%s\"", line, err.msg, col, t2 + 1);
        assert_int_equal(m.natoms, 0); /* left cleared */
        nd_molecule_free(&m);
        count++;
    }
    fclose(f);
    assert_true(count >= 40);
}

/* Bad arguments, empty input, and a very long chain. */
static void test_edges(void **state)
{
    (void)state;
    nd_molecule m;
    nd_molecule_init(&m);
    nd_error err;
    assert_int_equal(nd_smiles_parse("", &m, &err), ND_EINPUT);
    assert_contains(err.msg, "empty SMILES");
    assert_int_equal(nd_smiles_parse(NULL, &m, &err), ND_EINVAL);
    /* bytes that cannot be printed are named by their value */
    assert_int_equal(nd_smiles_parse("CC\001C", &m, &err), ND_EINPUT);
    assert_contains(err.msg, "column 3: unexpected byte 0x01");
    assert_int_equal(nd_smiles_parse("C\xc3\xa9", &m, &err), ND_EINPUT);
    assert_contains(err.msg, "unexpected byte 0xC3");
    assert_int_equal(nd_smiles_parse("C?C", &m, &err), ND_EINPUT);
    assert_contains(err.msg, "unexpected character '?'");
    char *out = (char *)1;
    assert_int_equal(nd_smiles_write(&m, &out, &err), ND_EINPUT);
    assert_null(out);
    /* aromatic orders cannot be written */
    nd_molecule_add_atom(&m, 6, 0, 0, 0, NULL);
    nd_molecule_add_atom(&m, 6, 0, 0, 0, NULL);
    nd_molecule_add_bond(&m, 0, 1, ND_BOND_AROMATIC, NULL);
    assert_int_equal(nd_smiles_write(&m, &out, &err), ND_EINPUT);
    assert_contains(err.msg, "aromatic");
    nd_molecule_free(&m);
    /* a 30000-carbon chain: no recursion depth limit in reader or writer */
    size_t len = 30000;
    char *chain = malloc(len + 1);
    memset(chain, 'C', len);
    chain[len] = '\0';
    nd_molecule_init(&m);
    parse_ok(chain, &m);
    assert_int_equal(m.natoms, 3 * 30000 + 2);
    assert_int_equal(nd_smiles_write(&m, &out, &err), ND_OK);
    assert_string_equal(out, chain);
    free(out);
    free(chain);
    nd_molecule_free(&m);
}

/* Checks that b (read back from the writer's text) is a with atoms
 * renumbered by order: elements, charges, isotopes, bonds, chirality and
 * double-bond configuration. */
static void assert_same_graph(const nd_molecule *a, const nd_molecule *b, const int *order,
                              const char *what)
{
    if (a->natoms != b->natoms || a->nbonds != b->nbonds)
        fail_msg("%s: %d atoms %d bonds became %d and %d", what, a->natoms, a->nbonds, b->natoms,
                 b->nbonds);
    for (int i = 0; i < a->natoms; i++) {
        int j = order[i];
        assert_true(j >= 0 && j < b->natoms);
        if (a->z[i] != b->z[j] || a->formal_charge[i] != b->formal_charge[j] ||
            a->isotope[i] != b->isotope[j])
            fail_msg("%s: atom %d differs after the round trip", what, i + 1);
    }
    for (int k = 0; k < a->nbonds; k++) {
        int x = order[a->bonds[k].a], y = order[a->bonds[k].b], found = -1;
        for (int q = 0; q < b->nbonds; q++)
            if ((b->bonds[q].a == x && b->bonds[q].b == y) || (b->bonds[q].a == y && b->bonds[q].b == x))
                found = q;
        if (found < 0 || b->bonds[found].order != a->bonds[k].order)
            fail_msg("%s: bond %d-%d lost or changed", what, a->bonds[k].a + 1, a->bonds[k].b + 1);
        const nd_bond *ba = &a->bonds[k], *bb = &b->bonds[found];
        if (ba->config == ND_DB_NONE) {
            if (bb->config != ND_DB_NONE)
                fail_msg("%s: bond %d gained a configuration", what, k + 1);
            continue;
        }
        /* the reference neighbours may differ after renumbering */
        int la = lowest_other(a, ba->a, ba->b), lb = lowest_other(a, ba->b, ba->a);
        int same = ba->config == ND_DB_CIS;
        int ra = lowest_other(b, order[ba->a], order[ba->b]);
        int rb = lowest_other(b, order[ba->b], order[ba->a]);
        if (order[la] != ra)
            same = !same;
        if (order[lb] != rb)
            same = !same;
        int want = same ? ND_DB_CIS : ND_DB_TRANS;
        if (bb->config != want)
            fail_msg("%s: double bond %d-%d configuration changed", what, ba->a + 1, ba->b + 1);
    }
    for (int i = 0; i < a->natoms; i++) {
        if (!a->chirality[i]) {
            if (b->chirality[order[i]])
                fail_msg("%s: atom %d gained chirality", what, i + 1);
            continue;
        }
        int nb[4], k = 0;
        for (int q = 0; q < a->nbonds && k < 4; q++) {
            if (a->bonds[q].a == i) nb[k++] = a->bonds[q].b;
            else if (a->bonds[q].b == i) nb[k++] = a->bonds[q].a;
        }
        int d = k == 4 ? nb[3] : -1;
        int sa = volume_sign(a, i, nb[0], nb[1], nb[2], d);
        int sb = volume_sign(b, order[i], order[nb[0]], order[nb[1]], order[nb[2]], d < 0 ? -1 : order[d]);
        if (sa != sb)
            fail_msg("%s: atom %d chirality changed", what, i + 1);
    }
}

/* Round trip of every molecule of the diverse corpus through the writer:
 * reading the written text gives the same graph with the same stereo, and
 * writing that again gives the same text. */
static void test_round_trip(void **state)
{
    (void)state;
    FILE *f = fopen("tests/data/smiles/diverse.smi", "r");
    assert_non_null(f);
    char line[1024];
    int count = 0, stereo = 0;
    nd_molecule a, b, c;
    nd_molecule_init(&a);
    nd_molecule_init(&b);
    nd_molecule_init(&c);
    while (fgets(line, sizeof line, f)) {
        if (line[0] == '#' || line[0] == '\n')
            continue;
        parse_ok(line, &a);
        char *text = NULL, *text2 = NULL;
        int *order = malloc((size_t)a.natoms * sizeof *order);
        nd_error err;
        if (nd_smiles_write_mapped(&a, &text, order, &err) != ND_OK)
            fail_msg("%s: %s", line, err.msg);
        parse_ok(text, &b);
        assert_same_graph(&a, &b, order, line);
        int *order2 = malloc((size_t)b.natoms * sizeof *order2);
        assert_int_equal(nd_smiles_write_mapped(&b, &text2, order2, &err), ND_OK);
        assert_string_equal(text, text2);
        for (int i = 0; i < a.natoms; i++)
            stereo += a.chirality[i] != 0;
        free(text);
        free(text2);
        free(order);
        free(order2);
        count++;
    }
    fclose(f);
    assert_true(count >= 300);
    assert_true(stereo >= 50);
    /* a hand-made molecule with H atoms first and an isotope-labelled H */
    nd_molecule_free(&a);
    nd_molecule_init(&a);
    parse_ok("[2H]OC([H])([H])[H]", &a);
    char *text = NULL;
    int order[8];
    assert_int_equal(nd_smiles_write_mapped(&a, &text, order, NULL), ND_OK);
    parse_ok(text, &b);
    assert_same_graph(&a, &b, order, text);
    assert_int_equal(b.isotope[order[0]], 2);
    free(text);
    nd_molecule_free(&a);
    nd_molecule_free(&b);
    nd_molecule_free(&c);
}

/* 1 if bond q lies on a ring: its ends stay connected without it. */
static int ring_bond(const nd_molecule *m, int q)
{
    int n = m->natoms, *seen = calloc((size_t)n, sizeof *seen), *queue = malloc((size_t)n * sizeof *queue);
    int h = 0, t = 0, found = 0;
    queue[t++] = m->bonds[q].a;
    seen[m->bonds[q].a] = 1;
    while (h < t && !found) {
        int u = queue[h++];
        for (int b = 0; b < m->nbonds; b++) {
            if (b == q)
                continue;
            int o = m->bonds[b].a == u ? m->bonds[b].b : m->bonds[b].b == u ? m->bonds[b].a : -1;
            if (o < 0 || seen[o])
                continue;
            if (o == m->bonds[q].b)
                found = 1;
            seen[o] = 1;
            queue[t++] = o;
        }
    }
    free(seen);
    free(queue);
    return found;
}

/* Configured double bonds around a ring: cyclooctatetraene with every
 * combination of cis/trans on its four double bonds round-trips (the
 * writer writes the ring hydrogens when the ring bonds' marks alone would
 * contradict). */
static void test_ring_configs(void **state)
{
    (void)state;
    for (int combo = 0; combo < 16; combo++) {
        nd_molecule a, b;
        nd_molecule_init(&a);
        nd_molecule_init(&b);
        parse_ok("C1=CC=CC=CC=C1", &a);
        int k = 0;
        for (int q = 0; q < a.nbonds; q++)
            if (a.bonds[q].order == ND_BOND_DOUBLE)
                a.bonds[q].config = (combo >> k++) & 1 ? ND_DB_CIS : ND_DB_TRANS;
        char *text = NULL;
        int order[16];
        nd_error err;
        if (nd_smiles_write_mapped(&a, &text, order, &err) != ND_OK)
            fail_msg("combination %d: %s", combo, err.msg);
        parse_ok(text, &b);
        assert_same_graph(&a, &b, order, text);
        free(text);
        nd_molecule_free(&a);
        nd_molecule_free(&b);
    }
}

/* Random stereo on every eligible centre and double bond of the corpus
 * (seeded): chirality +1/-1 on atoms with three or four neighbours, cis or
 * trans on double bonds outside rings with a single-bonded substituent at
 * each end (inside fused conjugated rings not every combination can be
 * written with / and \\; the writer then says so, see test_ring_configs). The
 * writer must express all of it, and reading its text must give it back.
 * This exercises the / and \ assignment along conjugated chains. */
static void test_random_stereo_round_trip(void **state)
{
    (void)state;
    FILE *f = fopen("tests/data/smiles/diverse.smi", "r");
    assert_non_null(f);
    char line[1024];
    nd_rng rng;
    nd_rng_seed(&rng, 4242);
    int centres = 0, bonds = 0, molecules = 0;
    nd_molecule a, b;
    nd_molecule_init(&a);
    nd_molecule_init(&b);
    while (fgets(line, sizeof line, f)) {
        if (line[0] == '#' || line[0] == '\n')
            continue;
        parse_ok(line, &a);
        for (int i = 0; i < a.natoms; i++) {
            int deg = 0;
            for (int q = 0; q < a.nbonds; q++)
                deg += a.bonds[q].a == i || a.bonds[q].b == i;
            a.chirality[i] = 0;
            if ((deg == 3 || deg == 4) && a.z[i] != 1) {
                a.chirality[i] = nd_rng_below(&rng, 2) ? 1 : -1;
                centres++;
            }
        }
        for (int q = 0; q < a.nbonds; q++) {
            nd_bond *bd = &a.bonds[q];
            bd->config = ND_DB_NONE;
            if (bd->order != ND_BOND_DOUBLE)
                continue;
            /* a stereo double bond: each end has a single-bonded
             * substituent (cumulenes cannot be written with / and \\) */
            int sa = 0, sb = 0;
            for (int r = 0; r < a.nbonds; r++) {
                const nd_bond *e = &a.bonds[r];
                if (e->order != ND_BOND_SINGLE)
                    continue;
                sa += e->a == bd->a || e->b == bd->a;
                sb += e->a == bd->b || e->b == bd->b;
            }
            if (!sa || !sb || ring_bond(&a, q))
                continue;
            bd->config = nd_rng_below(&rng, 2) ? ND_DB_CIS : ND_DB_TRANS;
            bonds++;
        }
        char *text = NULL;
        int *order = malloc((size_t)a.natoms * sizeof *order);
        nd_error err;
        if (nd_smiles_write_mapped(&a, &text, order, &err) != ND_OK)
            fail_msg("%s: %s", line, err.msg);
        parse_ok(text, &b);
        assert_same_graph(&a, &b, order, text);
        free(text);
        free(order);
        molecules++;
    }
    fclose(f);
    nd_molecule_free(&a);
    nd_molecule_free(&b);
    printf("# %d molecules, %d random centres, %d random double bonds round-tripped\n", molecules,
           centres, bonds);
    assert_true(centres > 1000);
    assert_true(bonds > 50);
}

/* Seeded mutations of the corpus (a character replaced, deleted or
 * inserted from the SMILES alphabet): the reader must answer ND_OK or
 * ND_EINPUT with a column inside the text, never anything else, and what
 * it accepts must write and read back with the same atom count. Run under
 * the sanitizers this is the crash test. */
static void test_mutations(void **state)
{
    (void)state;
    static const char alphabet[] = "CNOSPFIBrlcnops[]()=#$:/\\.%0123456789@H+-*";
    FILE *f = fopen("tests/data/smiles/diverse.smi", "r");
    assert_non_null(f);
    char line[1024];
    nd_rng rng;
    nd_rng_seed(&rng, 20261201);
    int tried = 0, accepted = 0;
    nd_molecule m, back;
    nd_molecule_init(&m);
    nd_molecule_init(&back);
    while (fgets(line, sizeof line, f)) {
        if (line[0] == '#' || line[0] == '\n')
            continue;
        line[strcspn(line, " \t\n")] = '\0';
        for (int k = 0; k < 8; k++) {
            char buf[1100];
            size_t len = strlen(line);
            size_t pos = (size_t)nd_rng_below(&rng, len + 1);
            char c = alphabet[nd_rng_below(&rng, sizeof alphabet - 1)];
            int kind = (int)nd_rng_below(&rng, 3);
            memcpy(buf, line, len + 1);
            if (kind == 0 && pos < len)
                buf[pos] = c;
            else if (kind == 1 && pos < len)
                memmove(buf + pos, buf + pos + 1, len - pos);
            else {
                memmove(buf + pos + 1, buf + pos, len - pos + 1);
                buf[pos] = c;
            }
            nd_error err;
            nd_error_clear(&err);
            int rc = nd_smiles_parse(buf, &m, &err);
            tried++;
            if (rc == ND_EINPUT) {
                int col = 0;
                assert_int_equal(sscanf(err.msg, "SMILES column %d:", &col), 1);
                assert_true(col >= 1 && (size_t)col <= strlen(buf) + 1);
                continue;
            }
            if (rc != ND_OK)
                fail_msg("'%s': status %d (%s)", buf, rc, err.msg);
            accepted++;
            char *text = NULL;
            if (nd_smiles_write(&m, &text, &err) != ND_OK)
                fail_msg("'%s' read but did not write: %s", buf, err.msg);
            if (nd_smiles_parse(text, &back, &err) != ND_OK)
                fail_msg("'%s' wrote '%s', which does not read: %s", buf, text, err.msg);
            assert_int_equal(back.natoms, m.natoms);
            assert_int_equal(back.nbonds, m.nbonds);
            free(text);
        }
    }
    fclose(f);
    nd_molecule_free(&m);
    nd_molecule_free(&back);
    printf("# %d mutated SMILES, %d accepted\n", tried, accepted);
    assert_true(tried > 2000);
    assert_true(accepted > 0 && accepted < tried);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_formulas),      cmocka_unit_test(test_kekule),
        cmocka_unit_test(test_bracket_atoms), cmocka_unit_test(test_tetrahedral),
        cmocka_unit_test(test_cis_trans),     cmocka_unit_test(test_broken_corpus),
        cmocka_unit_test(test_edges),         cmocka_unit_test(test_round_trip),
        cmocka_unit_test(test_mutations),     cmocka_unit_test(test_random_stereo_round_trip),
        cmocka_unit_test(test_ring_configs),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
