/* MDL molfile / SD file reading and writing. Layout checks follow the CTfile
 * formats specification (BIOVIA, "CTfile Formats": V2000 counts, atom and
 * bond lines; M  CHG / M  ISO superseding the atom block; V3000 CTAB; SD
 * data items and $$$$), as recalled from that document (from memory). */
#include "tests/lib/testutil.h"

#include "core/elements.h"
#include "core/rng.h"
#include "core/sdf.h"

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

/* --- building test records ------------------------------------------- */

typedef struct {
    char *buf;
    size_t len;
    FILE *f;
} text;

static void text_open(text *t)
{
    t->buf = NULL;
    t->len = 0;
    t->f = open_memstream(&t->buf, &t->len);
    assert_non_null(t->f);
}

static const char *text_close(text *t)
{
    fclose(t->f);
    return t->buf;
}

/* Header block and V2000 counts line. */
static void head(text *t, const char *title, const char *dim, int na, int nb)
{
    fprintf(t->f, "%s\n  Test    0101262200%s\n\n%3d%3d  0  0  0  0  0  0  0  0999 V2000\n", title,
            dim, na, nb);
}

/* A V2000 atom line: mass difference dd and charge code in their columns. */
static void atom(text *t, double x, double y, double z, const char *sym, int dd, int code)
{
    fprintf(t->f, "%10.4f%10.4f%10.4f %-3s%2d%3d  0  0  0  0  0  0  0  0  0  0\n", x, y, z, sym, dd,
            code);
}

static void bond(text *t, int a, int b, int order, int stereo)
{
    fprintf(t->f, "%3d%3d%3d%3d\n", a, b, order, stereo);
}

/* Glycine zwitterion, hand-built geometry (N-C 1.489, C-C 1.533, C-O 1.25 A). */
static void glycine(text *t, const char *title, int block_charges, int chg_lines)
{
    head(t, title, "3D", 10, 9);
    atom(t, 0.0, 0.0, 0.0, "N", 0, block_charges ? 3 : 0);
    atom(t, 0.0, 0.0, 1.4893, "C", 0, 0);
    atom(t, 1.4270, 0.0, 2.0485, "C", 0, 0);
    atom(t, 2.3489, -0.3423, 1.2716, "O", 0, 0);
    atom(t, 1.5372, 0.3315, 3.2561, "O", 0, block_charges ? 5 : 0);
    atom(t, 0.4633, -0.8497, -0.3561, "H", 0, 0);
    atom(t, 0.4971, 0.8307, -0.3485, "H", 0, 0);
    atom(t, -0.9647, -0.0185, -0.3704, "H", 0, 0);
    atom(t, -0.5429, 0.8791, 1.8431, "H", 0, 0);
    atom(t, -0.5247, -0.8872, 1.8462, "H", 0, 0);
    static const int b[9][3] = {{1, 2, 1}, {2, 3, 1}, {3, 4, 2}, {3, 5, 1}, {1, 6, 1},
                                {1, 7, 1}, {1, 8, 1}, {2, 9, 1}, {2, 10, 1}};
    for (int k = 0; k < 9; k++)
        bond(t, b[k][0], b[k][1], b[k][2], 0);
    if (chg_lines)
        fputs("M  CHG  2   1   1   5  -1\n", t->f);
    fputs("M  END\n", t->f);
}

/* --- reading helpers -------------------------------------------------- */

typedef struct {
    int ok, failed;
    nd_molecule first; /* first record read OK */
    char msg[ND_ERROR_MSG_MAX];
    int bad_record;
} result;

static void read_all(const char *txt, result *r)
{
    nd_lines l;
    nd_lines_init(&l, "t.sdf", "record", txt, strlen(txt), NULL);
    memset(r, 0, sizeof *r);
    nd_molecule_init(&r->first);
    nd_molecule m;
    nd_molecule_init(&m);
    nd_error err;
    for (int guard = 0; guard < 10000; guard++) {
        int s = nd_sdf_read(&l, &m, &err);
        if (s == ND_END)
            break;
        if (s == ND_OK) {
            if (!r->ok++)
                assert_int_equal(nd_molecule_copy(&r->first, &m, NULL), ND_OK);
        } else {
            if (s != ND_EINPUT)
                print_error("status %d: %s\n", s, err.msg);
            assert_int_equal(s, ND_EINPUT);
            if (!r->failed++) {
                snprintf(r->msg, sizeof r->msg, "%s", err.msg);
                r->bad_record = l.record;
            }
        }
    }
    nd_molecule_free(&m);
    nd_lines_free(&l);
}

/* --- tests ------------------------------------------------------------ */

/* A V2000 record with M  CHG, multi-line data items and a second record. */
static void test_read_v2000(void **state)
{
    (void)state;
    text t;
    text_open(&t);
    glycine(&t, "glycine zwitterion", 0, 1);
    fputs("> <collector>\nR. Okafor\n\n>  <site notes> (12)\npool margin\nsampled twice\n\n"
          "> <empty>\n\n$$$$\n",
          t.f);
    glycine(&t, "second", 1, 0);
    fputs("$$$$\n\n", t.f);
    result r;
    read_all(text_close(&t), &r);
    free(t.buf);
    assert_int_equal(r.ok, 2);
    assert_int_equal(r.failed, 0);
    nd_molecule *m = &r.first;
    assert_string_equal(m->title, "glycine zwitterion");
    assert_int_equal(m->natoms, 10);
    assert_int_equal(m->nbonds, 9);
    assert_int_equal(m->has_bonds, 1);
    assert_int_equal(m->dimension, 3);
    assert_int_equal(m->z[0], 7);
    assert_int_equal(m->formal_charge[0], 1);
    assert_int_equal(m->formal_charge[4], -1);
    assert_int_equal(m->charge, 0);
    assert_int_equal(m->bonds[2].a, 2);
    assert_int_equal(m->bonds[2].b, 3);
    assert_int_equal(m->bonds[2].order, 2);
    assert_true(m->xyz[3 * 4 + 2] == 3.2561);
    assert_int_equal(m->ndata, 3);
    assert_string_equal(nd_molecule_get_data(m, "collector"), "R. Okafor");
    assert_string_equal(nd_molecule_get_data(m, "site notes"), "pool margin\nsampled twice");
    assert_string_equal(nd_molecule_get_data(m, "empty"), "");
    assert_string_equal(m->data[1].name, "site notes"); /* input order kept */
    nd_molecule_free(&r.first);
}

/* Charges and isotopes: the atom block alone, and M  CHG / M  ISO, which
 * supersede every atom-block charge / mass difference (CTfile spec). */
static void test_charges_isotopes(void **state)
{
    (void)state;
    text t;
    text_open(&t);
    glycine(&t, "block charges only", 1, 0);
    result r;
    read_all(text_close(&t), &r);
    free(t.buf);
    assert_int_equal(r.ok, 1);
    assert_int_equal(r.first.formal_charge[0], 1);  /* code 3 = +1 */
    assert_int_equal(r.first.formal_charge[4], -1); /* code 5 = -1 */
    nd_molecule_free(&r.first);

    /* block charges +1 on atom 1 and -1 on atom 5, but M  CHG names only atom 2 */
    text_open(&t);
    head(&t, "override", "3D", 5, 0);
    atom(&t, 0.0, 0.0, 0.0, "N", 0, 3);
    atom(&t, 1.1, 0.0, 0.0, "O", 0, 0);
    atom(&t, 2.2, 0.0, 0.0, "C", 1, 0);   /* 12 + 1 = 13C */
    atom(&t, 3.3, 0.0, 0.0, "D", 0, 0);   /* deuterium */
    atom(&t, 4.4, 0.0, 0.0, "Cl", 0, 1);  /* code 1 = +3, overridden */
    fputs("M  CHG  1   2  -2\nM  CHG  1   3   1\nM  END\n$$$$\n", t.f);
    read_all(text_close(&t), &r);
    free(t.buf);
    assert_int_equal(r.ok, 1);
    int expect_q[5] = {0, -2, 1, 0, 0};
    for (int i = 0; i < 5; i++)
        assert_int_equal(r.first.formal_charge[i], expect_q[i]);
    assert_int_equal(r.first.charge, -1);
    assert_int_equal(r.first.isotope[2], 13);
    assert_int_equal(r.first.isotope[3], 2);
    assert_int_equal(r.first.z[3], 1);
    /* 13C (AME2020: 13.00335483507) + 2H (2.01410177812) + N + O + Cl (IUPAC 2021) */
    assert_close(nd_molecule_mass(&r.first),
                 14.007 + 15.999 + 13.00335483507 + 2.01410177812 + 35.45, 1e-9);
    nd_molecule_free(&r.first);

    /* M  ISO replaces the block's mass differences */
    text_open(&t);
    head(&t, "iso", "3D", 2, 1);
    atom(&t, 0.0, 0.0, 0.0, "C", 1, 0);
    atom(&t, 1.2, 0.0, 0.0, "O", 0, 0);
    bond(&t, 1, 2, 2, 0);
    fputs("M  ISO  1   2  18\nM  END\n", t.f); /* no $$$$: a lone molfile */
    read_all(text_close(&t), &r);
    free(t.buf);
    assert_int_equal(r.ok, 1);
    assert_int_equal(r.first.isotope[0], 0);
    assert_int_equal(r.first.isotope[1], 18);
    nd_molecule_free(&r.first);
}

/* Radicals set the multiplicity: methyl (one doublet centre) is 2, a
 * triplet carbene centre 3, and M  RAD replaces the atom block's code 4. */
static void test_radicals(void **state)
{
    (void)state;
    static const struct {
        int code;
        const char *props;
        int mult, charge;
    } cases[] = {
        {4, "", 2, 0},                               /* atom-block doublet */
        {0, "M  RAD  1   1   2\n", 2, 0},           /* M  RAD doublet */
        {0, "M  RAD  1   1   3\n", 3, 0},           /* triplet */
        {0, "M  RAD  1   1   1\n", 1, 0},           /* singlet carbene */
        {4, "M  CHG  1   1   1\n", 1, 1},           /* M  CHG wipes the block's radical too */
        {0, "M  RAD  2   1   2   2   2\n", 3, 0},   /* two doublets, high spin */
    };
    for (size_t i = 0; i < sizeof cases / sizeof cases[0]; i++) {
        text t;
        result r;
        text_open(&t);
        head(&t, "radical", "3D", 2, 1);
        atom(&t, 0.0, 0.0, 0.0, "C", 0, cases[i].code);
        atom(&t, 1.5, 0.0, 0.0, "C", 0, 0);
        bond(&t, 1, 2, 1, 0);
        fprintf(t.f, "%sM  END\n", cases[i].props);
        read_all(text_close(&t), &r);
        free(t.buf);
        assert_int_equal(r.ok, 1);
        assert_int_equal(r.first.multiplicity, cases[i].mult);
        assert_int_equal(r.first.charge, cases[i].charge);
        nd_molecule_free(&r.first);
    }
    result r;
    read_all("bad\n\n\n  1  0  0  0  0  0  0  0  0  0999 V2000\n"
             "    0.0000    0.0000    0.0000 C   0  0  0\nM  RAD  1   1   5\nM  END\n", &r);
    assert_int_equal(r.failed, 1);
    assert_contains(r.msg, "line 6: M  RAD line: atom 1 has radical code 5");
}

/* Four neighbours at +x, +y, +z and (-1,-1,-1) around the centre: the
 * signed volume of molecule.h is det(I) = +1. Mirrored (z -> -z): -1. */
static void tetra(text *t, double zsign, const char *syms[4])
{
    head(t, "tetra", "3D", 5, 4);
    atom(t, 0.0, 0.0, 0.0, "C", 0, 0);
    atom(t, 1.1, 0.0, 0.0, syms[0], 0, 0);
    atom(t, 0.0, 1.1, 0.0, syms[1], 0, 0);
    atom(t, 0.0, 0.0, 1.1 * zsign, syms[2], 0, 0);
    atom(t, -0.6, -0.6, -0.6 * zsign, syms[3], 0, 0);
    for (int k = 2; k <= 5; k++)
        bond(t, 1, k, 1, 0);
    fputs("M  END\n$$$$\n", t->f);
}

static void test_chirality(void **state)
{
    (void)state;
    const char *chiral[4] = {"Br", "Cl", "F", "H"};
    const char *flat[4] = {"Br", "Cl", "H", "H"};
    text t;
    result r;
    for (int mirror = 0; mirror < 2; mirror++) {
        text_open(&t);
        tetra(&t, mirror ? -1.0 : 1.0, chiral);
        read_all(text_close(&t), &r);
        free(t.buf);
        assert_int_equal(r.ok, 1);
        assert_int_equal(r.first.chirality[0], mirror ? -1 : 1);
        for (int i = 1; i < 5; i++)
            assert_int_equal(r.first.chirality[i], 0);
        nd_molecule_free(&r.first);
    }
    text_open(&t); /* two hydrogens: not a stereocentre */
    tetra(&t, 1.0, flat);
    read_all(text_close(&t), &r);
    free(t.buf);
    assert_int_equal(r.first.chirality[0], 0);
    nd_molecule_free(&r.first);

    text_open(&t); /* a 2D drawing: no chirality from coordinates */
    head(&t, "flat", "2D", 5, 4);
    atom(&t, 0.0, 0.0, 0.0, "C", 0, 0);
    atom(&t, 1.1, 0.0, 0.0, "Br", 0, 0);
    atom(&t, 0.0, 1.1, 0.0, "Cl", 0, 0);
    atom(&t, -1.1, 0.0, 0.0, "F", 0, 0);
    atom(&t, 0.0, -1.1, 0.0, "H", 0, 0);
    for (int k = 2; k <= 5; k++)
        bond(&t, 1, k, 1, k == 2 ? 1 : 0);
    fputs("M  END\n", t.f);
    read_all(text_close(&t), &r);
    free(t.buf);
    assert_int_equal(r.first.dimension, 2);
    assert_int_equal(r.first.chirality[0], 0);
    nd_molecule_free(&r.first);
}

/* But-2-ene in the plane z = 0 (C=C 1.337 A, C-C 1.503 A, 125 degrees).
 * cis puts both methyls on the same side; stereo 3 means "either". */
static void butene(text *t, int cis, int stereo, const char *dim)
{
    head(t, cis ? "(Z)-but-2-ene" : "(E)-but-2-ene", dim, 6, 5);
    atom(t, 0.0, 0.0, 0.0, "C", 0, 0);
    atom(t, 0.0, 0.0, 1.3371, "C", 0, 0);
    atom(t, 1.2263, 0.0, -0.8683, "C", 0, 0);
    atom(t, cis ? 1.2263 : -1.2263, 0.0, 2.2054, "C", 0, 0);
    atom(t, -0.9515, 0.0, -0.5296, "H", 0, 0);
    atom(t, cis ? -0.9515 : 0.9515, 0.0, 1.8667, "H", 0, 0);
    bond(t, 1, 2, 2, stereo);
    bond(t, 1, 3, 1, 0);
    bond(t, 2, 4, 1, 0);
    bond(t, 1, 5, 1, 0);
    bond(t, 2, 6, 1, 0);
    fputs("M  END\n$$$$\n", t->f);
}

static void test_double_bond_config(void **state)
{
    (void)state;
    static const struct {
        int cis, stereo, expect;
    } cases[] = {{0, 0, ND_DB_TRANS}, {1, 0, ND_DB_CIS}, {1, 3, ND_DB_NONE}};
    for (size_t i = 0; i < sizeof cases / sizeof cases[0]; i++) {
        text t;
        result r;
        text_open(&t);
        butene(&t, cases[i].cis, cases[i].stereo, "3D");
        read_all(text_close(&t), &r);
        free(t.buf);
        assert_int_equal(r.ok, 1);
        assert_int_equal(r.first.bonds[0].config, cases[i].expect);
        assert_int_equal(r.first.bonds[1].config, ND_DB_NONE);
        nd_molecule_free(&r.first);
    }
    /* isobutene: two methyls on one end, no configuration */
    text t;
    result r;
    text_open(&t);
    head(&t, "isobutene", "2D", 4, 3);
    atom(&t, 0.0, 0.0, 0.0, "C", 0, 0);
    atom(&t, 1.33, 0.0, 0.0, "C", 0, 0);
    atom(&t, -0.75, 1.3, 0.0, "C", 0, 0);
    atom(&t, -0.75, -1.3, 0.0, "C", 0, 0);
    bond(&t, 1, 2, 2, 0);
    bond(&t, 1, 3, 1, 0);
    bond(&t, 1, 4, 1, 0);
    fputs("M  END\n", t.f);
    read_all(text_close(&t), &r);
    free(t.buf);
    assert_int_equal(r.first.bonds[0].config, ND_DB_NONE);
    nd_molecule_free(&r.first);
    /* cyclopropene-like ring: a double bond in a 3-ring has no configuration */
    text_open(&t);
    head(&t, "ring", "2D", 5, 5);
    atom(&t, 0.0, 0.0, 0.0, "C", 0, 0);
    atom(&t, 1.3, 0.0, 0.0, "C", 0, 0);
    atom(&t, 0.65, 1.2, 0.0, "C", 0, 0);
    atom(&t, -1.0, -0.6, 0.0, "Cl", 0, 0);
    atom(&t, 2.3, -0.6, 0.0, "Br", 0, 0);
    bond(&t, 1, 2, 2, 0);
    bond(&t, 2, 3, 1, 0);
    bond(&t, 3, 1, 1, 0);
    bond(&t, 1, 4, 1, 0);
    bond(&t, 2, 5, 1, 0);
    fputs("M  END\n", t.f);
    read_all(text_close(&t), &r);
    free(t.buf);
    assert_int_equal(r.ok, 1);
    assert_int_equal(r.first.bonds[0].config, ND_DB_NONE);
    nd_molecule_free(&r.first);
}

/* V3000: COUNTS, ATOM with CHG= and MASS=, continuation lines, BOND,
 * an SGROUP block read over, data items after M  END. */
static void test_read_v3000(void **state)
{
    (void)state;
    const char *txt = "acetate-13C\n  Test    01012622003D\n\n"
                      "  0  0  0     0  0            999 V3000\n"
                      "M  V30 BEGIN CTAB\nM  V30 COUNTS 4 3 0 0 0\nM  V30 BEGIN ATOM\n"
                      "M  V30 1 C 0.0 0.0 0.0 0 RAD=2\n"
                      "M  V30 2 C 1.52 0.0 0.0 0 MASS=13\n"
                      "M  V30 3 O 2.15 1.08 0.0 0\n"
                      "M  V30 4 O 2.15 -1.08 -\nM  V30 0.0 0 CHG=-1\n"
                      "M  V30 END ATOM\nM  V30 BEGIN BOND\n"
                      "M  V30 1 1 1 2\nM  V30 2 2 2 3\nM  V30 3 1 2 4\n"
                      "M  V30 END BOND\nM  V30 BEGIN SGROUP\nM  V30 1 SUP 0 ATOMS=(1 1)\n"
                      "M  V30 END SGROUP\nM  V30 END CTAB\nM  END\n> <pKa>\n4.76\n\n$$$$\n";
    result r;
    read_all(txt, &r);
    assert_int_equal(r.ok, 1);
    assert_int_equal(r.failed, 0);
    nd_molecule *m = &r.first;
    assert_string_equal(m->title, "acetate-13C");
    assert_int_equal(m->natoms, 4);
    assert_int_equal(m->nbonds, 3);
    assert_int_equal(m->isotope[1], 13);
    assert_int_equal(m->formal_charge[3], -1);
    assert_int_equal(m->charge, -1);
    assert_true(m->xyz[3 * 3 + 1] == -1.08);
    assert_int_equal(m->bonds[1].order, 2);
    assert_string_equal(nd_molecule_get_data(m, "pKa"), "4.76");
    assert_int_equal(m->dimension, 3); /* header code 3D though every z is 0 */
    assert_int_equal(m->multiplicity, 2); /* RAD=2: a doublet centre */
    nd_molecule_free(&r.first);
}

/* Every error path: record 1 is bad, record 2 good; the message names the
 * file, record and line and says what was expected. */
static void test_errors(void **state)
{
    (void)state;
    static const char *good = "good\n\n\n  1  0  0  0  0  0  0  0  0  0999 V2000\n"
                              "    0.0000    0.0000    0.0000 He  0  0  0  0  0  0  0  0  0  0  0  0\n"
                              "M  END\n$$$$\n";
    static const char *A = "    0.0000    0.0000    0.0000 C   0  0  0  0  0  0  0  0  0  0  0  0\n";
    static const char *B = "    1.5000    0.0000    0.0000 O   0  0  0  0  0  0  0  0  0  0  0  0\n";
    char buf[4096];
    static const struct {
        const char *counts, *atoms, *rest, *msg;
    } cases[] = {
        {"  x  0", "", "M  END\n", "line 4: expected the counts line"},
        {"  2  1  0  0  0  0  0  0  0  0999 V2001", "", "M  END\n", "version 'V2001'"},
        {"  1  0  2  0  0  0  0  0  0  0999 V2000", "A", "M  END\n", "atom lists"},
        {"  3  0  0  0  0  0  0  0  0  0999 V2000", "AB", "M  END\n", "line 7: expected atom line 3 of 3"},
        {"  2  0  0  0  0  0  0  0  0  0999 V2000", "A", "", "record ends ('$$$$') too early; expected atom line 2 of 2"},
        {"  2  2  0  0  0  0  0  0  0  0999 V2000", "AB", "  1  2  1  0\n", "expected bond line 2 of 2"},
        {"  2  1  0  0  0  0  0  0  0  0999 V2000", "AB", "  1  3  1  0\nM  END\n", "line 7: bond 1 joins atoms 1 and 3; expected atom numbers 1..2"},
        {"  2  1  0  0  0  0  0  0  0  0999 V2000", "AB", "  0  2  1  0\nM  END\n", "bond 1 joins atoms 0 and 2"},
        {"  2  1  0  0  0  0  0  0  0  0999 V2000", "AB", "  2  2  1  0\nM  END\n", "joins atom 2 to itself"},
        {"  2  1  0  0  0  0  0  0  0  0999 V2000", "AB", "  1  2  8  0\nM  END\n", "bond 1 has type 8"},
        {"  2  1  0  0  0  0  0  0  0  0999 V2000", "AB", "  1 x2  1  0\nM  END\n", "bond 1: expected first atom"},
        {"  2  2  0  0  0  0  0  0  0  0999 V2000", "AB", "  1  2  1  0\n  2  1  2  0\nM  END\n", "line 8: bond 2 joins atoms 1 and 2 again"},
        {"  2  0  0  0  0  0  0  0  0  0999 V2000", "AB", "", "expected 'M  END'"},
        {"  2  0  0  0  0  0  0  0  0  0999 V2000", "AB", "> <x>\n1\n\n", "data item before 'M  END'"},
        {"  2  0  0  0  0  0  0  0  0  0999 V2000", "AB", "garbage\nM  END\n", "expected a property line"},
        {"  2  0  0  0  0  0  0  0  0  0999 V2000", "AB", "M  CHG  1   3   1\nM  END\n", "M  CHG line: atom 3 is outside 1..2"},
        {"  2  0  0  0  0  0  0  0  0  0999 V2000", "AB", "M  CHG  2   1   1\nM  END\n", "M  CHG line: expected a count 1..8"},
        {"  2  0  0  0  0  0  0  0  0  0999 V2000", "AB", "M  CHG  1   1  20\nM  END\n", "has charge 20"},
        {"  2  0  0  0  0  0  0  0  0  0999 V2000", "AB", "M  CHG  1   a   1\nM  END\n", "entry 1 is not a pair of integers"},
        {"  2  0  0  0  0  0  0  0  0  0999 V2000", "AB", "M  ISO  1   1   3\nM  END\n", "mass number 3"},
        {"  2  0  0  0  0  0  0  0  0  0999 V2000", "AB", "S  SKPxx\nM  END\n", "S  SKP line"},
        {"  2  0  0  0  0  0  0  0  0  0999 V2000", "AB", "M  END\nnot a header\n", "expected a data header"},
        {"  2  0  0  0  0  0  0  0  0  0999 V2000", "AB", "M  END\n> no name\nv\n\n", "data header without a name"},
        {"  2  0  0  0  0  0  0  0  0  0999 V2000", "AB", "M  END\n> <a>\n1\n\n> <a>\n2\n\n", "data item <a> appears twice"},
        {"  1  0  0  0  0  0  0  0  0  0999 V2000", "", "    0.0000    0.0000    0.0000 Xx  0  0  0\nM  END\n", "unknown element symbol 'Xx'"},
        {"  1  0  0  0  0  0  0  0  0  0999 V2000", "", "    0.0000    0.0000    0.0000 CL  0  0  0\nM  END\n", "unknown element symbol 'CL'"},
        {"  1  0  0  0  0  0  0  0  0  0999 V2000", "", "    0.0000    0.0000    0.0000 Pt  0  0  0\nM  END\n", "unknown element symbol 'Pt'"},
        {"  1  0  0  0  0  0  0  0  0  0999 V2000", "", "    0.0000    0.0000    0.0000 A   0  0  0\nM  END\n", "'A' is a query atom"},
        {"  1  0  0  0  0  0  0  0  0  0999 V2000", "", "    0.0000    0.0000    0.0000 C\nM  END\n", "line has 32 columns; expected at least 34"},
        {"  1  0  0  0  0  0  0  0  0  0999 V2000", "", "    0.0000       nan    0.0000 C   0  0  0\nM  END\n", "y coordinate 'nan' is not finite"},
        {"  1  0  0  0  0  0  0  0  0  0999 V2000", "", "    0.0000    0.0000      -inf C   0  0  0\nM  END\n", "z coordinate '-inf' is not finite"},
        {"  1  0  0  0  0  0  0  0  0  0999 V2000", "", "    0.00a0    0.0000    0.0000 C   0  0  0\nM  END\n", "x coordinate '0.00a0' is not a number"},
        {"  1  0  0  0  0  0  0  0  0  0999 V2000", "", "              0.0000    0.0000 C   0  0  0\nM  END\n", "x coordinate '' is not a number"},
        {"  1  0  0  0  0  0  0  0  0  0999 V2000", "", "    0.0000    0.0000    0.0000 C   0  9  0\nM  END\n", "charge code in columns 37-39 must be 0..7"},
        {"  1  0  0  0  0  0  0  0  0  0999 V2000", "", "    0.0000    0.0000    0.0000 C   x  0  0\nM  END\n", "mass difference in columns 35-36"},
        {"  1  0  0  0  0  0  0  0  0  0999 V2000", "", "    0.0000    0.0000    0.0000 C   9  0  0\nM  END\n", "mass difference 9"},
        {"  2  1  0  0  0  0  0  0  0  0999 V3000", "", "M  V30 BEGIN CTAB\nM  V30 COUNTS x\nM  V30 END CTAB\nM  END\n", "expected 'M  V30 COUNTS"},
        {"  0  0  0  0  0  0  0  0  0  0999 V3000", "", "M  V30 BEGIN CTOB\nM  END\n", "expected 'M  V30 BEGIN CTAB'"},
        {"  0  0  0  0  0  0  0  0  0  0999 V3000", "", "M  V30 BEGIN CTAB\nM  V30 COUNTS 2 0 0 0 0\nM  V30 BEGIN ATOM\nM  V30 1 C 0 0 0 0\nM  V30 END ATOM\nM  V30 END CTAB\nM  END\n", "ATOM block ends after 1 atoms; COUNTS says 2"},
        {"  0  0  0  0  0  0  0  0  0  0999 V3000", "", "M  V30 BEGIN CTAB\nM  V30 COUNTS 1 0 0 0 0\nM  V30 BEGIN ATOM\nM  V30 1 C 0 0 0 0\nM  V30 2 C 0 0 0 0\nM  V30 END ATOM\nM  V30 END CTAB\nM  END\n", "expected 'M  V30 END ATOM' after 1 atoms"},
        {"  0  0  0  0  0  0  0  0  0  0999 V3000", "", "M  V30 BEGIN CTAB\nM  V30 COUNTS 1 0 0 0 0\nM  V30 BEGIN ATOM\nM  V30 3 C 0 0 0 0\nM  V30 END ATOM\nM  V30 END CTAB\nM  END\n", "atom 1: expected 'index type x y z map"},
        {"  0  0  0  0  0  0  0  0  0  0999 V3000", "", "M  V30 BEGIN CTAB\nM  V30 COUNTS 1 0 0 0 0\nM  V30 BEGIN ATOM\nM  V30 1 [C,N] 0 0 0 0\nM  V30 END ATOM\nM  V30 END CTAB\nM  END\n", "query atom"},
        {"  0  0  0  0  0  0  0  0  0  0999 V3000", "", "M  V30 BEGIN CTAB\nM  V30 COUNTS 1 0 0 0 0\nM  V30 BEGIN ATOM\nM  V30 1 C 0 0 0 0 CHG=x\nM  V30 END ATOM\nM  V30 END CTAB\nM  END\n", "CHG=x; expected an integer"},
        {"  0  0  0  0  0  0  0  0  0  0999 V3000", "", "M  V30 BEGIN CTAB\nM  V30 COUNTS 1 0 0 0 0\nM  V30 BEGIN ATOM\nM  V30 1 C 0 0 0 0 MASS=2\nM  V30 END ATOM\nM  V30 END CTAB\nM  END\n", "MASS=2; expected a mass number"},
        {"  0  0  0  0  0  0  0  0  0  0999 V3000", "", "M  V30 BEGIN CTAB\nM  V30 COUNTS 1 0 0 0 0\nM  V30 BEGIN ATOM\nM  V30 1 C 0 inf 0 0\nM  V30 END ATOM\nM  V30 END CTAB\nM  END\n", "y coordinate 'inf' is not finite"},
        {"  0  0  0  0  0  0  0  0  0  0999 V3000", "", "M  V30 BEGIN CTAB\nM  V30 COUNTS 2 1 0 0 0\nM  V30 BEGIN ATOM\nM  V30 1 C 0 0 0 0\nM  V30 2 C 1 0 0 0\nM  V30 END ATOM\nM  V30 BEGIN BOND\nM  V30 1 1 1 5\nM  V30 END BOND\nM  V30 END CTAB\nM  END\n", "bond 1 joins atoms 1 and 5"},
        {"  0  0  0  0  0  0  0  0  0  0999 V3000", "", "M  V30 BEGIN CTAB\nM  V30 COUNTS 2 1 0 0 0\nM  V30 BEGIN ATOM\nM  V30 1 C 0 0 0 0\nM  V30 2 C 1 0 0 0\nM  V30 END ATOM\nM  V30 END CTAB\nM  END\n", "CTAB has no BOND block"},
        {"  0  0  0  0  0  0  0  0  0  0999 V3000", "", "M  V30 BEGIN CTAB\nM  V30 COUNTS 0 0 0 0 0\nM  V30 BEGIN SGROUP\nM  V30 END CTAB\nM  END\n", "block is not closed"},
        {"  0  0  0  0  0  0  0  0  0  0999 V3000", "", "M  V30 BEGIN CTAB\nM  V30 COUNTS 0 0 0 0 0\nM  V31 END CTAB\nM  END\n", "expected a V3000 line starting 'M  V30 '"},
        {"  0  0  0  0  0  0  0  0  0  0999 V3000", "", "M  V30 BEGIN CTAB\nM  V30 COUNTS 0 0 0 0 0\nM  V30 WHAT\nM  V30 END CTAB\nM  END\n", "expected 'BEGIN ATOM'"},
        {"  0  0  0  0  0  0  0  0  0  0999 V3000", "", "M  V30 BEGIN CTAB\nM  V30 COUNTS 1 0 0 0 0\nM  V30 END CTAB\nM  END\n", "CTAB has no ATOM block"},
        {"  0  0  0  0  0  0  0  0  0  0999 V3000", "", "M  V30 BEGIN CTAB\nM  V30 COUNTS 0 0 0 0 0\nM  V30 BEGIN BOND\nM  V30 END BOND\nM  V30 END CTAB\nM  END\n", "BOND block before the ATOM block"},
        {"  0  0  0  0  0  0  0  0  0  0999 V3000", "", "M  V30 BEGIN CTAB\nM  V30 COUNTS 0 0 0 0 0\nM  V30 BEGIN ATOM\nM  V30 END ATOM\nM  V30 BEGIN ATOM\nM  V30 END ATOM\nM  V30 END CTAB\nM  END\n", "a second ATOM block"},
        {"  0  0  0  0  0  0  0  0  0  0999 V3000", "", "M  V30 BEGIN CTAB\nM  V30 COUNTS 2 1 0 0 0\nM  V30 BEGIN ATOM\nM  V30 1 C 0 0 0 0\nM  V30 2 C 1 0 0 0\nM  V30 END ATOM\nM  V30 BEGIN BOND\nM  V30 1 1 1 2 CFG=up\nM  V30 END BOND\nM  V30 END CTAB\nM  END\n", "bond 1: CFG=up is not an integer"},
        {"  0  0  0  0  0  0  0  0  0  0999 V3000", "", "M  V30 BEGIN CTAB\nM  V30 COUNTS 2 1 0 0 0\nM  V30 BEGIN ATOM\nM  V30 1 C 0 0 0 0\nM  V30 2 C 1 0 0 0\nM  V30 END ATOM\nM  V30 BEGIN BOND\nM  V30 7 1 1 2\nM  V30 END BOND\nM  V30 END CTAB\nM  END\n", "bond 1: expected 'index type atom1 atom2"},
        {"  0  0  0  0  0  0  0  0  0  0999 V3000", "", "M  V30 BEGIN CTAB\nM  V30 COUNTS 2 1 0 0 0\nM  V30 BEGIN ATOM\nM  V30 1 C 0 0 0 0\nM  V30 2 C 1 0 0 0\nM  V30 END ATOM\nM  V30 BEGIN BOND\nM  V30 END BOND\nM  V30 END CTAB\nM  END\n", "BOND block ends after 0 bonds; COUNTS says 1"},
        {"  0  0  0  0  0  0  0  0  0  0999 V3000", "", "M  V30 BEGIN CTAB\nM  V30 COUNTS 2 1 0 0 0\nM  V30 BEGIN ATOM\nM  V30 1 C 0 0 0 0\nM  V30 2 C 1 0 0 0\nM  V30 END ATOM\nM  V30 BEGIN BOND\nM  V30 1 1 1 2\nM  V30 2 1 1 2\nM  V30 END BOND\nM  V30 END CTAB\nM  END\n", "expected 'M  V30 END BOND' after 1 bonds"},
        {"  2  0  0  0  0  0  0  0  0  0999 V2000", "AB", "A    1\n", "expected the text line of an alias"},
        {"  2  0  0  0  0  0  0  0  0  0999 V2000", "AB", "M  END\n> <" "0123456789012345678901234567890123456789012345678901234567890123456789012345678901234567890123456789012345678901234567890123456789012345678901234567890123456789012345678901234567890123456789012345678901234567890123456789012345678901234567890123456789012345678901234567890123456789" ">\nv\n\n", "data item name longer than 255"},
    };
    for (size_t i = 0; i < sizeof cases / sizeof cases[0]; i++) {
        size_t n = (size_t)snprintf(buf, sizeof buf, "bad\n  Test    0101262200\n\n%s\n", cases[i].counts);
        for (const char *c = cases[i].atoms; *c; c++)
            n += (size_t)snprintf(buf + n, sizeof buf - n, "%s", *c == 'A' ? A : B);
        snprintf(buf + n, sizeof buf - n, "%s$$$$\n%s", cases[i].rest, good);
        result r;
        read_all(buf, &r);
        if (r.failed != 1 || r.ok != 1 || !strstr(r.msg, cases[i].msg))
            print_error("case %zu: ok %d failed %d message '%s'\n", i, r.ok, r.failed, r.msg);
        assert_int_equal(r.failed, 1);
        assert_int_equal(r.ok, 1);
        assert_int_equal(r.bad_record, 1);
        assert_contains(r.msg, "t.sdf, record 1, line ");
        assert_contains(r.msg, cases[i].msg);
        assert_string_equal(r.first.title, "good");
        nd_molecule_free(&r.first);
    }
}

/* Property lines that are read over: aliases and groups (with their text
 * line), S  SKP with its skipped lines, V and other M lines. */
static void test_properties_read_over(void **state)
{
    (void)state;
    text t;
    text_open(&t);
    head(&t, "props", "3D", 2, 1);
    atom(&t, 0.0, 0.0, 0.0, "C", 0, 0);
    atom(&t, 1.2, 0.0, 0.0, "O", 0, 0);
    bond(&t, 1, 2, 2, 0);
    fputs("A    1\nMe\nG    2  1\nOMe\nV    1 value text\nS  SKP  2\nskipped one\nskipped two\n"
          "M  STY  1   1 SUP\nM  END\n> <kept>\nyes\n\n$$$$\n",
          t.f);
    result r;
    read_all(text_close(&t), &r);
    free(t.buf);
    assert_int_equal(r.ok, 1);
    assert_int_equal(r.failed, 0);
    assert_string_equal(nd_molecule_get_data(&r.first, "kept"), "yes");
    nd_molecule_free(&r.first);
}

/* Record-level cases: truncation, the end of input, blank starts, empty records. */
static void test_record_errors(void **state)
{
    (void)state;
    result r;
    read_all("t\n\n\n  2  0  0  0  0  0  0  0  0  0999 V2000\n"
             "    0.0000    0.0000    0.0000 C   0  0  0\n", &r);
    assert_int_equal(r.failed, 1);
    assert_contains(r.msg, "input ends inside the record; expected atom line 2 of 2");
    read_all("only a title\n", &r);
    assert_int_equal(r.failed, 1);
    assert_contains(r.msg, "expected header line 2");
    read_all("\n\n\n\n\n", &r); /* blank lines only: no record at all */
    assert_int_equal(r.ok + r.failed, 0);
    /* three blank header lines: the fourth line is the counts line */
    read_all("\n\n\n  1  0  0  0  0  0  0  0  0  0999 V2000\n"
             "    0.0000    0.0000    1.5000 Ne  0  0  0\nM  END\n$$$$\n"
             "\n  Test    0101262200\n\n  1  0  0  0  0  0  0  0  0  0999 V2000\n"
             "    0.0000    0.0000    0.0000 Ar  0  0  0\nM  END\n", &r);
    assert_int_equal(r.failed, 0);
    assert_int_equal(r.ok, 2);
    assert_null(r.first.title);
    assert_int_equal(r.first.natoms, 1);
    assert_int_equal(r.first.z[0], 10);
    assert_int_equal(r.first.dimension, 3); /* from the non-zero z */
    nd_molecule_free(&r.first);
    read_all("\n\n\n$$$$\n", &r);
    assert_int_equal(r.failed, 1);
    assert_contains(r.msg, "record 1, line 4: record ends ('$$$$') too early; expected the counts line");
    read_all("\n\n\n\nx\n", &r);
    assert_contains(r.msg, "4 blank lines at the start of the record");
    read_all("$$$$\n", &r);
    assert_contains(r.msg, "empty record");
    read_all("t\n$$$$\nu\n\n\n  0  0  0  0  0  0  0  0  0  0999 V2000\nM  END\n", &r);
    assert_int_equal(r.failed, 1);
    assert_contains(r.msg, "record 1, line 2: record ends ('$$$$') too early");
    assert_int_equal(r.ok, 1);
    assert_int_equal(r.first.natoms, 0);
    assert_int_equal(r.first.dimension, 0);
    nd_molecule_free(&r.first);
}

/* Builds a random molecule: chain bonds, some charges, isotopes, data. */
static void random_molecule(nd_rng *rng, nd_molecule *m, int index)
{
    nd_molecule_clear(m);
    int n = 1 + (int)nd_rng_below(rng, 40);
    static const int zs[] = {1, 6, 7, 8, 9, 15, 16, 17, 35, 53};
    for (int i = 0; i < n; i++) {
        double x[3];
        for (int k = 0; k < 3; k++)
            x[k] = (nd_rng_uniform(rng) - 0.5) * 40.0;
        assert_int_equal(nd_molecule_add_atom(m, zs[nd_rng_below(rng, 10)], x[0], x[1], x[2], NULL), ND_OK);
        if (nd_rng_below(rng, 5) == 0)
            m->formal_charge[i] = (int)nd_rng_below(rng, 9) - 4;
    }
    for (int i = 1; i < n; i++)
        assert_int_equal(nd_molecule_add_bond(m, (int)nd_rng_below(rng, (uint64_t)i), i,
                                              1 + (int)nd_rng_below(rng, 3), NULL),
                         ND_OK);
    if (n > 2 && m->z[1] == 6)
        m->isotope[1] = 13;
    if (m->z[0] == 1)
        m->isotope[0] = 2;
    m->charge = nd_molecule_formal_charge_sum(m);
    m->dimension = 3;
    char title[64], value[128];
    snprintf(title, sizeof title, "random molecule %d", index);
    assert_int_equal(nd_molecule_set_title(m, title, NULL), ND_OK);
    snprintf(value, sizeof value, "line one of %d\nline two: %.6f", index, nd_rng_uniform(rng));
    assert_int_equal(nd_molecule_set_data(m, "notes", value, NULL), ND_OK);
    assert_int_equal(nd_molecule_set_data(m, "index", title + 16, NULL), ND_OK);
}

/* Seeded round trip of many records: coordinates within the 10.4 columns'
 * half unit (5e-5 A), everything else exact; writing what was read gives
 * the same text bit for bit. */
static void test_round_trip(void **state)
{
    (void)state;
    nd_rng rng;
    nd_rng_seed(&rng, 77123);
    int nrec = nd_test_sanitized() ? 40 : 300;
    nd_molecule *orig = calloc((size_t)nrec, sizeof *orig);
    assert_non_null(orig);
    char *buf = NULL, *buf2 = NULL;
    size_t len = 0, len2 = 0;
    FILE *f = open_memstream(&buf, &len);
    for (int k = 0; k < nrec; k++) {
        nd_molecule_init(&orig[k]);
        random_molecule(&rng, &orig[k], k);
        assert_int_equal(nd_sdf_write(f, &orig[k], NULL), ND_OK);
    }
    fclose(f);
    nd_lines l;
    nd_lines_init(&l, "rt.sdf", "record", buf, len, NULL);
    nd_molecule m;
    nd_molecule_init(&m);
    nd_error err;
    f = open_memstream(&buf2, &len2);
    for (int k = 0; k < nrec; k++) {
        int s = nd_sdf_read(&l, &m, &err);
        if (s != ND_OK)
            print_error("record %d: %s\n", k + 1, err.msg);
        assert_int_equal(s, ND_OK);
        const nd_molecule *o = &orig[k];
        assert_int_equal(m.natoms, o->natoms);
        assert_int_equal(m.nbonds, o->nbonds);
        assert_string_equal(m.title, o->title);
        assert_int_equal(m.charge, o->charge);
        for (int i = 0; i < o->natoms; i++) {
            assert_int_equal(m.z[i], o->z[i]);
            assert_int_equal(m.formal_charge[i], o->formal_charge[i]);
            assert_int_equal(m.isotope[i], o->isotope[i]);
            for (int c = 0; c < 3; c++)
                assert_close(m.xyz[3 * i + c], o->xyz[3 * i + c], 5e-5 + 1e-12);
        }
        for (int b = 0; b < o->nbonds; b++) {
            assert_int_equal(m.bonds[b].a, o->bonds[b].a);
            assert_int_equal(m.bonds[b].b, o->bonds[b].b);
            assert_int_equal(m.bonds[b].order, o->bonds[b].order);
        }
        assert_int_equal(m.ndata, 2);
        assert_string_equal(nd_molecule_get_data(&m, "notes"), nd_molecule_get_data(o, "notes"));
        assert_string_equal(m.data[1].name, "index");
        assert_int_equal(nd_sdf_write(f, &m, NULL), ND_OK);
    }
    assert_int_equal(nd_sdf_read(&l, &m, &err), ND_END);
    fclose(f);
    assert_int_equal(len, len2);
    assert_memory_equal(buf, buf2, len);
    nd_lines_free(&l);
    nd_molecule_free(&m);
    for (int k = 0; k < nrec; k++)
        nd_molecule_free(&orig[k]);
    free(orig);
    free(buf);
    free(buf2);
}

/* Writing refuses what V2000 cannot hold, and writes nothing then. */
static void test_write_errors(void **state)
{
    (void)state;
    nd_molecule m;
    nd_molecule_init(&m);
    nd_error err;
    char *buf = NULL;
    size_t len = 0;
    FILE *f = open_memstream(&buf, &len);
    for (int i = 0; i < 1000; i++)
        assert_int_equal(nd_molecule_add_atom(&m, 6, i, 0, 0, NULL), ND_OK);
    assert_int_equal(nd_sdf_write(f, &m, &err), ND_EINPUT);
    assert_contains(err.msg, "at most 999");
    nd_molecule_clear(&m);
    assert_int_equal(nd_molecule_add_atom(&m, 6, 123456.0, 0, 0, NULL), ND_OK);
    assert_int_equal(nd_sdf_write(f, &m, &err), ND_EINPUT);
    assert_contains(err.msg, "does not fit the SD 10.4 columns");
    m.xyz[0] = -10000.0;
    assert_int_equal(nd_sdf_write(f, &m, &err), ND_EINPUT);
    m.xyz[0] = 0.0;
    m.formal_charge[0] = 16;
    assert_int_equal(nd_sdf_write(f, &m, &err), ND_EINPUT);
    assert_contains(err.msg, "charge 16");
    m.formal_charge[0] = 0;
    assert_int_equal(nd_molecule_set_data(&m, "a>b", "x", NULL), ND_OK);
    assert_int_equal(nd_sdf_write(f, &m, &err), ND_EINPUT);
    assert_contains(err.msg, "data item name 'a>b'");
    nd_molecule_clear(&m);
    assert_int_equal(nd_molecule_add_atom(&m, 6, 0, 0, 0, NULL), ND_OK);
    assert_int_equal(nd_molecule_set_data(&m, "gap", "one\n\nthree", NULL), ND_OK);
    assert_int_equal(nd_sdf_write(f, &m, &err), ND_EINPUT);
    assert_contains(err.msg, "data item <gap> has an empty or '$$$$' line");
    assert_int_equal(nd_molecule_set_data(&m, "gap", "one\n$$$$", NULL), ND_OK);
    assert_int_equal(nd_sdf_write(f, &m, &err), ND_EINPUT);
    assert_int_equal(nd_molecule_set_data(&m, "gap", "trailing\n", NULL), ND_OK);
    assert_int_equal(nd_sdf_write(f, &m, &err), ND_EINPUT);
    nd_molecule_clear(&m);
    assert_int_equal(nd_molecule_add_atom(&m, 6, 0, 0, 0, NULL), ND_OK);
    assert_int_equal(nd_molecule_add_atom(&m, 8, 1.2, 0, 0, NULL), ND_OK);
    assert_int_equal(nd_molecule_set_title(&m, "$$$$", NULL), ND_OK);
    assert_int_equal(nd_sdf_write(f, &m, &err), ND_EINPUT);
    assert_contains(err.msg, "title '$$$$' cannot be an SD header line");
    assert_int_equal(nd_molecule_set_title(&m, "fine", NULL), ND_OK);
    assert_int_equal(nd_molecule_add_bond(&m, 0, 1, 2, NULL), ND_OK);
    m.bonds[0].order = 7;
    assert_int_equal(nd_sdf_write(f, &m, &err), ND_EINPUT);
    assert_contains(err.msg, "bond 1 has order 7");
    m.bonds[0].order = 2;
    m.isotope[0] = 1000;
    assert_int_equal(nd_sdf_write(f, &m, &err), ND_EINPUT);
    assert_contains(err.msg, "mass number 1000");
    m.isotope[0] = 0;
    m.z[1] = 0;
    assert_int_equal(nd_sdf_write(f, &m, &err), ND_EINPUT);
    assert_contains(err.msg, "atomic number 0");
    fclose(f);
    assert_int_equal(len, 0);
    free(buf);
    nd_molecule_free(&m);
}

/* The written layout: counts line, charge codes and M  CHG / M  ISO lines,
 * checked against the column layout of the CTfile specification. */
static void test_write_layout(void **state)
{
    (void)state;
    nd_molecule m;
    nd_molecule_init(&m);
    assert_int_equal(nd_molecule_add_atom(&m, 7, 0.0, 0.0, 0.0, NULL), ND_OK);
    assert_int_equal(nd_molecule_add_atom(&m, 8, 1.25, -0.333333, 2.0, NULL), ND_OK);
    assert_int_equal(nd_molecule_add_bond(&m, 0, 1, 1, NULL), ND_OK);
    m.formal_charge[0] = 1;
    m.formal_charge[1] = -1;
    m.isotope[1] = 18;
    m.dimension = 3;
    assert_int_equal(nd_molecule_set_title(&m, "layout", NULL), ND_OK);
    char *buf = NULL;
    size_t len = 0;
    FILE *f = open_memstream(&buf, &len);
    assert_int_equal(nd_sdf_write(f, &m, NULL), ND_OK);
    fclose(f);
    assert_string_equal(buf, "layout\n  nadir             3D\n\n"
                             "  2  1  0  0  0  0  0  0  0  0999 V2000\n"
                             "    0.0000    0.0000    0.0000 N   0  3  0  0  0  0  0  0  0  0  0  0\n"
                             "    1.2500   -0.3333    2.0000 O   0  5  0  0  0  0  0  0  0  0  0  0\n"
                             "  1  2  1  0\n"
                             "M  CHG  2   1   1   2  -1\n"
                             "M  ISO  1   2  18\n"
                             "M  END\n$$$$\n");
    free(buf);
    nd_molecule_free(&m);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_read_v2000),     cmocka_unit_test(test_charges_isotopes),
        cmocka_unit_test(test_radicals),
        cmocka_unit_test(test_chirality),      cmocka_unit_test(test_double_bond_config),
        cmocka_unit_test(test_read_v3000),     cmocka_unit_test(test_errors),
        cmocka_unit_test(test_properties_read_over),
        cmocka_unit_test(test_record_errors),  cmocka_unit_test(test_round_trip),
        cmocka_unit_test(test_write_errors),   cmocka_unit_test(test_write_layout),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
