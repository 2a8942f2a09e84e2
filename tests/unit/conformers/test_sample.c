/* Sampling moves: rotor kinds and values, torsion setting, ring flips that
 * exchange axial and equatorial without touching stereo, nitrogen
 * inversion, the clash screen. */
#include "tests/lib/testutil.h"

#include "conformers/embed.h"
#include "conformers/sample.h"
#include "conformers/verify.h"
#include "core/smiles.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

typedef struct {
    nd_molecule m;
    nd_topology t;
    nd_sampler *s;
} fixture;

static void build(const char *smiles, fixture *f)
{
    nd_error err;
    nd_molecule_init(&f->m);
    memset(&f->t, 0, sizeof f->t);
    assert_int_equal(nd_smiles_parse(smiles, &f->m, &err), ND_OK);
    assert_int_equal(nd_embed_molecule(&f->m, 5, 0, NULL, &err), ND_OK);
    assert_int_equal(nd_topology_build(&f->m, &f->t, &err), ND_OK);
    assert_int_equal(nd_sampler_new(&f->m, &f->t, &f->s, &err), ND_OK);
}

static void done(fixture *f)
{
    nd_sampler_free(f->s);
    nd_topology_free(&f->t);
    nd_molecule_free(&f->m);
}

static double dist(const double *x, int i, int j)
{
    double d2 = 0;
    for (int k = 0; k < 3; k++)
        d2 += (x[3 * i + k] - x[3 * j + k]) * (x[3 * i + k] - x[3 * j + k]);
    return sqrt(d2);
}

static void test_rotor_kinds(void **state)
{
    (void)state;
    fixture f;
    build("CCCC", &f);
    assert_int_equal(nd_sampler_rotors(f.s), 1);
    const nd_rotor *r = nd_sampler_rotor(f.s, 0);
    assert_int_equal(r->kind, ND_ROTOR_SP3_SP3);
    assert_int_equal(r->nvalues, 3);
    assert_close(r->values[0], 60.0, 0);
    assert_close(r->values[1], 180.0, 0);
    assert_int_equal(r->nmoving, 7); /* a CH2-CH3 half: 2 carbons + 5 H */
    assert_close(nd_sampler_combinations(f.s), 3.0, 0);
    done(&f);

    /* N-ethylacetamide: the amide C-N (planar, two values) and N-CH2 */
    build("CC(=O)NCC", &f);
    int planar = 0, other = 0;
    for (int i = 0; i < nd_sampler_rotors(f.s); i++) {
        const nd_rotor *q = nd_sampler_rotor(f.s, i);
        if (q->kind == ND_ROTOR_PLANAR) {
            planar++;
            assert_int_equal(q->nvalues, 2);
            assert_close(q->values[1], 180.0, 0);
        } else {
            other++;
        }
    }
    assert_int_equal(planar, 1);
    assert_int_equal(other, 1); /* N-CH2 */
    done(&f);

    build("CCc1ccccc1", &f);
    int sp2sp3 = 0;
    for (int i = 0; i < nd_sampler_rotors(f.s); i++)
        if (nd_sampler_rotor(f.s, i)->kind == ND_ROTOR_SP2_SP3) {
            sp2sp3++;
            assert_int_equal(nd_sampler_rotor(f.s, i)->nvalues, 6);
        }
    assert_int_equal(sp2sp3, 1);
    done(&f);

    build("c1ccccc1-c1ccccc1", &f);
    assert_int_equal(nd_sampler_rotors(f.s), 1);
    assert_int_equal(nd_sampler_rotor(f.s, 0)->kind, ND_ROTOR_CONJ);
    done(&f);

    build("CCOC(=O)C", &f); /* ethyl acetate: ester C-O planar, O-CH2 sp2-sp3 */
    planar = 0;
    for (int i = 0; i < nd_sampler_rotors(f.s); i++)
        planar += nd_sampler_rotor(f.s, i)->kind == ND_ROTOR_PLANAR;
    assert_int_equal(planar, 1);
    done(&f);
}

/* Setting a torsion reaches the target exactly, leaves every bond length
 * and the other rotors' torsions alone. Hexane: three adjacent rotors. */
static void test_set_torsion(void **state)
{
    (void)state;
    fixture f;
    build("CCCCCC", &f);
    int nr = nd_sampler_rotors(f.s);
    assert_int_equal(nr, 3);
    int n = f.m.natoms;
    double *x = malloc(3 * (size_t)n * sizeof *x);
    memcpy(x, f.m.xyz, 3 * (size_t)n * sizeof *x);
    const double targets[3] = {-63.25, 178.5, 71.125};
    for (int r = 0; r < nr; r++)
        nd_sampler_set_torsion(f.s, r, targets[r], x);
    for (int r = 0; r < nr; r++) {
        const nd_rotor *q = nd_sampler_rotor(f.s, r);
        double got = nd_sampler_dihedral(x, q->a, q->b, q->c, q->d);
        assert_close(got, targets[r], 1e-9);
    }
    /* set the middle one again: the others stay */
    nd_sampler_set_torsion(f.s, 1, -175.0, x);
    for (int r = 0; r < nr; r++) {
        const nd_rotor *q = nd_sampler_rotor(f.s, r);
        assert_close(nd_sampler_dihedral(x, q->a, q->b, q->c, q->d), r == 1 ? -175.0 : targets[r],
                     1e-9);
    }
    for (int b = 0; b < f.m.nbonds; b++)
        assert_close(dist(x, f.m.bonds[b].a, f.m.bonds[b].b),
                     dist(f.m.xyz, f.m.bonds[b].a, f.m.bonds[b].b), 1e-9);
    free(x);
    done(&f);
}

/* Angle (degrees) between the bond ring atom -> substituent and the ring's
 * mean-plane normal: near 0 for axial, near 70-90 for equatorial. */
static double axial_angle(const double *x, const int *ring, int len, int c, int sub)
{
    double cen[3] = {0, 0, 0}, r1[3] = {0, 0, 0}, r2[3] = {0, 0, 0};
    for (int k = 0; k < len; k++)
        for (int d = 0; d < 3; d++)
            cen[d] += x[3 * ring[k] + d] / len;
    for (int k = 0; k < len; k++)
        for (int d = 0; d < 3; d++) {
            r1[d] += (x[3 * ring[k] + d] - cen[d]) * sin(2 * M_PI * k / len);
            r2[d] += (x[3 * ring[k] + d] - cen[d]) * cos(2 * M_PI * k / len);
        }
    double nv[3] = {r1[1] * r2[2] - r1[2] * r2[1], r1[2] * r2[0] - r1[0] * r2[2],
                    r1[0] * r2[1] - r1[1] * r2[0]};
    double b[3], dot = 0, ln = 0, lb = 0;
    for (int d = 0; d < 3; d++) {
        b[d] = x[3 * sub + d] - x[3 * c + d];
        dot += b[d] * nv[d];
        ln += nv[d] * nv[d];
        lb += b[d] * b[d];
    }
    return acos(fabs(dot) / sqrt(ln * lb)) * 180.0 / M_PI;
}

/* Ring flip of trans-1-methyl-4-hydroxycyclohexane: stereocentres and
 * every tetrahedral configuration keep their signs, the methyl goes from
 * equatorial to axial or back, bond lengths are kept. */
static void test_ring_flip(void **state)
{
    (void)state;
    fixture f;
    build("C[C@H]1CC[C@@H](O)CC1", &f);
    assert_int_equal(nd_sampler_flips(f.s), 1);
    const nd_ring_flip *rf = nd_sampler_flip(f.s, 0);
    assert_int_equal(rf->size, 6);
    int n = f.m.natoms;
    double *x = malloc(3 * (size_t)n * sizeof *x);
    memcpy(x, f.m.xyz, 3 * (size_t)n * sizeof *x);
    nd_verify *v;
    assert_int_equal(nd_verify_new(&f.m, f.m.xyz, &v, NULL), ND_OK);
    double before = axial_angle(x, rf->atoms, rf->size, 1, 0);
    nd_sampler_flip_ring(f.s, 0, x);
    double after = axial_angle(x, rf->atoms, rf->size, 1, 0);
    /* axial <-> equatorial (the ideal angles are about 0 and 70 degrees) */
    assert_true((before < 35 && after > 50) || (before > 50 && after < 35));
    int atom;
    nd_verify_verdict r = nd_verify_check(v, x, &atom);
    assert_int_equal(r, ND_VERIFY_OK);
    for (int b = 0; b < f.m.nbonds; b++)
        assert_close(dist(x, f.m.bonds[b].a, f.m.bonds[b].b),
                     dist(f.m.xyz, f.m.bonds[b].a, f.m.bonds[b].b), 1e-9);
    free(x);
    nd_verify_free(v);
    done(&f);

    /* fused rings (decalin) are left to re-embedding; benzene is flat */
    build("C1CCC2CCCCC2C1", &f);
    assert_int_equal(nd_sampler_flips(f.s), 0);
    done(&f);
    build("c1ccccc1", &f);
    assert_int_equal(nd_sampler_flips(f.s), 0);
    assert_close(nd_sampler_combinations(f.s), 1.0, 0);
    done(&f);
}

static void test_nitrogen_inversion(void **state)
{
    (void)state;
    fixture f;
    build("CCN(C)CC", &f); /* N-methyldiethylamine */
    assert_int_equal(nd_sampler_inversions(f.s), 1);
    int N = nd_sampler_inversion_atom(f.s, 0);
    assert_int_equal(f.m.z[N], 7);
    int n = f.m.natoms;
    double *x = malloc(3 * (size_t)n * sizeof *x);
    memcpy(x, f.m.xyz, 3 * (size_t)n * sizeof *x);
    int nb[3], k = 0;
    for (int b = 0; b < f.m.nbonds; b++) {
        if (f.m.bonds[b].a == N)
            nb[k++] = f.m.bonds[b].b;
        else if (f.m.bonds[b].b == N)
            nb[k++] = f.m.bonds[b].a;
    }
    assert_int_equal(k, 3);
    double v0 = nd_verify_signed_volume(x, N, nb[0], nb[1], nb[2]);
    nd_sampler_apply(f.s, nd_sampler_rotors(f.s) + nd_sampler_flips(f.s), 1, x);
    double v1 = nd_verify_signed_volume(x, N, nb[0], nb[1], nb[2]);
    assert_true(v0 * v1 < 0);
    assert_close(fabs(v0), fabs(v1), 1e-9);
    for (int i = 0; i < n; i++)
        if (i != N)
            for (int d = 0; d < 3; d++)
                assert_close(x[3 * i + d], f.m.xyz[3 * i + d], 0);
    free(x);
    done(&f);
    /* amide nitrogen is planar: no inversion */
    build("CC(=O)N(C)C", &f);
    assert_int_equal(nd_sampler_inversions(f.s), 0);
    done(&f);
}

static void test_clash(void **state)
{
    (void)state;
    fixture f;
    build("CCCCCCO", &f);
    int n = f.m.natoms;
    assert_int_equal(nd_sampler_clash(f.s, f.m.xyz, 0.5, NULL, NULL), 0);
    double *x = malloc(3 * (size_t)n * sizeof *x);
    memcpy(x, f.m.xyz, 3 * (size_t)n * sizeof *x);
    /* the oxygen (atom 6) onto carbon 0, six bonds away */
    for (int d = 0; d < 3; d++)
        x[18 + d] = x[d] + 0.3;
    int a = -1, b = -1;
    assert_int_equal(nd_sampler_clash(f.s, x, 0.5, &a, &b), 1);
    assert_true((a == 0 && b == 6) || a == 6 || b == 6 || a == 0);
    free(x);
    done(&f);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_rotor_kinds),
        cmocka_unit_test(test_set_torsion),
        cmocka_unit_test(test_ring_flip),
        cmocka_unit_test(test_nitrogen_inversion),
        cmocka_unit_test(test_clash),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
