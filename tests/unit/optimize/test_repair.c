/* Imaginary-mode repair on analytic potentials whose saddles and minima are known. */
#include "tests/lib/testutil.h"

#include "tests/lib/analytic.h"
#include "core/molecule.h"
#include "optimize/minimize.h"
#include "optimize/modes.h"
#include "optimize/repair.h"

#include <math.h>
#include <omp.h>
#include <string.h>

/* Symmetric linear triatomic O1-C-O2 with a double well in the
 * antisymmetric stretch q = r1 - r2 (as in test_modes.c):
 *   E = ks/2 (r1 + r2 - 2 r0)^2 + b (q^2 - q0^2)^2 + kt/2 |u1 + u2|^2.
 * The linear symmetric structure (q = 0) is a first-order saddle with
 * E = b q0^4; the minima are the linear structures with q = +-q0 and
 * r1 + r2 = 2 r0, where E = 0. */
typedef struct {
    double ks, b, q0, kt, r0;
} well;

static int well_energy(void *ctx, int n, const double *x, double *energy, double *g)
{
    const well *t = ctx;
    (void)n;
    double d1[3], d2[3], r1 = 0, r2 = 0, u1[3], u2[3], w[3];
    for (int c = 0; c < 3; c++) {
        d1[c] = x[c] - x[3 + c];
        d2[c] = x[6 + c] - x[3 + c];
        r1 += d1[c] * d1[c];
        r2 += d2[c] * d2[c];
    }
    r1 = sqrt(r1);
    r2 = sqrt(r2);
    for (int c = 0; c < 3; c++) {
        u1[c] = d1[c] / r1;
        u2[c] = d2[c] / r2;
        w[c] = u1[c] + u2[c];
    }
    double q = r1 - r2, s = r1 + r2 - 2 * t->r0, w2 = w[0] * w[0] + w[1] * w[1] + w[2] * w[2];
    double dw = q * q - t->q0 * t->q0;
    *energy = 0.5 * t->ks * s * s + t->b * dw * dw + 0.5 * t->kt * w2;
    if (!g)
        return ND_OK;
    double dq = 4 * t->b * q * dw;
    double de1 = t->ks * s + dq, de2 = t->ks * s - dq;
    double uw1 = u1[0] * w[0] + u1[1] * w[1] + u1[2] * w[2];
    double uw2 = u2[0] * w[0] + u2[1] * w[1] + u2[2] * w[2];
    for (int c = 0; c < 3; c++) {
        double g1 = de1 * u1[c] + t->kt * (w[c] - uw1 * u1[c]) / r1;
        double g2 = de2 * u2[c] + t->kt * (w[c] - uw2 * u2[c]) / r2;
        g[c] = g1;
        g[6 + c] = g2;
        g[3 + c] = -g1 - g2;
    }
    return ND_OK;
}

static void triatomic(nd_molecule *m, double l)
{
    nd_molecule_init(m);
    /* tilted line through an unround point */
    double u[3] = {0.48, -0.36, 0.80}, c[3] = {0.21, 1.13, -0.57};
    int z[3] = {8, 6, 8};
    for (int i = 0; i < 3; i++) {
        double t = (i - 1) * l;
        assert_int_equal(nd_molecule_add_atom(m, z[i], c[0] + t * u[0], c[1] + t * u[1], c[2] + t * u[2], NULL),
                         ND_OK);
    }
}

static double dist(const double *x, int i, int j)
{
    double s = 0;
    for (int k = 0; k < 3; k++)
        s += (x[3 * i + k] - x[3 * j + k]) * (x[3 * i + k] - x[3 * j + k]);
    return sqrt(s);
}

/* Dihedral angle i-j-k-l in radians. */
static double dihedral(const double *x, int i, int j, int k, int l)
{
    double b1[3], b2[3], b3[3], n1[3], n2[3], m1[3];
    for (int c = 0; c < 3; c++) {
        b1[c] = x[3 * j + c] - x[3 * i + c];
        b2[c] = x[3 * k + c] - x[3 * j + c];
        b3[c] = x[3 * l + c] - x[3 * k + c];
    }
#define CROSS(a, b, o) \
    (o)[0] = (a)[1] * (b)[2] - (a)[2] * (b)[1], (o)[1] = (a)[2] * (b)[0] - (a)[0] * (b)[2], \
    (o)[2] = (a)[0] * (b)[1] - (a)[1] * (b)[0]
    CROSS(b1, b2, n1);
    CROSS(b2, b3, n2);
    CROSS(n1, b2, m1);
#undef CROSS
    double nb = sqrt(b2[0] * b2[0] + b2[1] * b2[1] + b2[2] * b2[2]);
    double xx = n1[0] * n2[0] + n1[1] * n2[1] + n1[2] * n2[2];
    double yy = (m1[0] * n2[0] + m1[1] * n2[1] + m1[2] * n2[2]) / nb;
    return atan2(yy, xx);
}

static void test_triatomic_saddle(void **state)
{
    (void)state;
    well t = {620.0, 494.0, 0.153, 111.2, 1.162};
    nd_energy pot = {well_energy, NULL, &t};
    /* its gradient is its energy's derivative (central differences, bent and stretched) */
    double xb[9] = {0.11, -0.07, -1.21, 0.02, 0.05, 0.01, -0.13, 0.19, 1.09};
    assert_true(nd_test_gradient_error(&pot, 3, xb, 1e-5) < 1e-5);
    nd_molecule mol;
    triatomic(&mol, t.r0);
    nd_modes m;
    nd_check c;
    nd_repair_result r;
    nd_error err;
    assert_int_equal(nd_repair_run(&pot, &mol, NULL, NULL, &m, &c, &r, &err), ND_OK);
    assert_int_equal(r.nimag_start, 1);
    assert_true(r.lowest_start < -300);
    assert_int_equal(r.nimag_end, 0);
    assert_int_equal(r.repaired, 1);
    assert_int_equal(r.rounds, 1);
    assert_int_equal(r.trials, 2);
    assert_int_equal(r.hessians, 2);
    assert_close(r.energy_start, t.b * pow(t.q0, 4), 1e-12);
    assert_true(r.energy_end < 1e-6);
    assert_int_equal(c.verdict, ND_VERDICT_MINIMUM);
    assert_int_equal(c.nimag, 0);
    assert_true(m.freq[0] > 0);
    /* the minimum: |r1 - r2| = q0, r1 + r2 = 2 r0 */
    double r1 = dist(mol.xyz, 0, 1), r2 = dist(mol.xyz, 2, 1);
    assert_close(fabs(r1 - r2), t.q0, 1e-3);
    assert_close(r1 + r2, 2 * t.r0, 1e-3);
    nd_modes_free(&m);
    nd_molecule_free(&mol);
}

/* Eclipsed ethane under the shared bonded test potential (tests/lib/analytic.h)
 * is a first-order saddle of the methyl torsion; repair must reach the
 * staggered minimum: cos 3 phi = -1 for every H-C-C-H torsion, and the
 * energy of the independently minimised staggered structure. */
static void test_eclipsed_ethane(void **state)
{
    (void)state;
    nd_molecule mol;
    nd_molecule_init(&mol);
    int idx = -1;
    for (int i = 0; i < nd_test_molecule_count(); i++)
        if (strcmp(nd_test_molecule_name(i), "ethane") == 0)
            idx = i;
    assert_true(idx >= 0);
    assert_int_equal(nd_test_molecule_build(idx, &mol, NULL), ND_OK);
    nd_test_bonded *bd;
    assert_int_equal(nd_test_bonded_new(&bd, &mol, NULL), ND_OK);
    nd_energy pot = {nd_test_bonded_energy, NULL, bd};
    nd_minimize_options o;
    nd_minimize_options_default(&o);
    nd_converge_preset_modes(&o.stop);
    nd_minimize_result mr;
    assert_int_equal(nd_minimize(NULL, &pot, mol.natoms, mol.xyz, &o, &mr, NULL), ND_OK);
    double e_staggered = mr.energy;
    /* the H atoms on the second carbon (the generator lists C0, C1, then H) */
    int c0 = 0, c1 = 1, h0 = -1, h1[3], nh1 = 0;
    for (int b = 0; b < mol.nbonds; b++) {
        int a = mol.bonds[b].a, bb = mol.bonds[b].b;
        int other = a == c0 ? bb : bb == c0 ? a : -1;
        if (other >= 0 && mol.z[other] == 1 && h0 < 0)
            h0 = other;
        other = a == c1 ? bb : bb == c1 ? a : -1;
        if (other >= 0 && mol.z[other] == 1)
            h1[nh1++] = other;
    }
    assert_int_equal(nh1, 3);
    assert_true(cos(3 * dihedral(mol.xyz, h0, c0, c1, h1[0])) < -0.999);
    /* turn the second methyl by 60 degrees about C0-C1: eclipsed */
    double u[3], nn = 0;
    for (int k = 0; k < 3; k++) {
        u[k] = mol.xyz[3 * c1 + k] - mol.xyz[3 * c0 + k];
        nn += u[k] * u[k];
    }
    nn = sqrt(nn);
    for (int k = 0; k < 3; k++)
        u[k] /= nn;
    for (int p = 0; p < 3; p++) {
        double *v = mol.xyz + 3 * h1[p], d[3];
        for (int k = 0; k < 3; k++)
            d[k] = v[k] - mol.xyz[3 * c1 + k];
        double dot = u[0] * d[0] + u[1] * d[1] + u[2] * d[2], cs = cos(M_PI / 3), sn = sin(M_PI / 3);
        double w[3] = {u[1] * d[2] - u[2] * d[1], u[2] * d[0] - u[0] * d[2], u[0] * d[1] - u[1] * d[0]};
        for (int k = 0; k < 3; k++)
            v[k] = mol.xyz[3 * c1 + k] + d[k] * cs + w[k] * sn + u[k] * dot * (1 - cs);
    }
    assert_true(cos(3 * dihedral(mol.xyz, h0, c0, c1, h1[0])) > 0.999);
    /* relax within the eclipsed form (symmetry keeps it there) */
    assert_int_equal(nd_minimize(NULL, &pot, mol.natoms, mol.xyz, &o, &mr, NULL), ND_OK);
    assert_true(mr.energy > e_staggered + 1.0);

    nd_repair_result r;
    nd_check c;
    assert_int_equal(nd_repair_run(&pot, &mol, NULL, NULL, NULL, &c, &r, NULL), ND_OK);
    assert_int_equal(r.nimag_start, 1);
    assert_true(r.lowest_start < -100);
    assert_int_equal(r.repaired, 1);
    assert_int_equal(c.nimag, 0);
    assert_close(r.energy_end, e_staggered, 1e-4);
    for (int p = 0; p < 3; p++)
        assert_true(cos(3 * dihedral(mol.xyz, h0, c0, c1, h1[p])) < -0.99);
    nd_test_bonded_free(bd);
    nd_molecule_free(&mol);
}

/* A minimum is left alone: one analysis, no trials, coordinates untouched. */
static void test_minimum_untouched(void **state)
{
    (void)state;
    well t = {620.0, 494.0, 0.153, 111.2, 1.162};
    nd_energy pot = {well_energy, NULL, &t};
    nd_molecule mol;
    triatomic(&mol, t.r0);
    double d = t.q0 / 2; /* r1 = r0 + q0/2, r2 = r0 - q0/2: q = q0, s = 0 */
    double u[3] = {0.48, -0.36, 0.80};
    for (int k = 0; k < 3; k++) {
        mol.xyz[k] -= d * u[k];
        mol.xyz[6 + k] -= d * u[k];
    }
    double before[9];
    memcpy(before, mol.xyz, sizeof before);
    nd_repair_result r;
    assert_int_equal(nd_repair_run(&pot, &mol, NULL, NULL, NULL, NULL, &r, NULL), ND_OK);
    assert_int_equal(r.rounds, 0);
    assert_int_equal(r.trials, 0);
    assert_int_equal(r.hessians, 1);
    assert_int_equal(r.repaired, 1);
    assert_true(memcmp(before, mol.xyz, sizeof before) == 0);
    assert_true(r.energy_start < 1e-20);
    nd_molecule_free(&mol);
}

/* With C frozen, the O atoms alone repair the double well and C does not move. */
static void test_frozen(void **state)
{
    (void)state;
    well t = {620.0, 494.0, 0.153, 111.2, 1.162};
    nd_energy pot = {well_energy, NULL, &t};
    nd_molecule mol;
    triatomic(&mol, t.r0);
    double c0[3];
    memcpy(c0, mol.xyz + 3, sizeof c0);
    int frozen[3] = {0, 1, 0};
    nd_repair_result r;
    nd_modes m;
    assert_int_equal(nd_repair_run(&pot, &mol, frozen, NULL, &m, NULL, &r, NULL), ND_OK);
    assert_int_equal(r.nimag_start, 1);
    assert_int_equal(r.repaired, 1);
    assert_int_equal(m.natoms, 2);
    assert_int_equal(m.nexternal, 0);
    assert_true(memcmp(c0, mol.xyz + 3, sizeof c0) == 0);
    assert_close(fabs(dist(mol.xyz, 0, 1) - dist(mol.xyz, 2, 1)), t.q0, 1e-3);
    nd_modes_free(&m);
    nd_molecule_free(&mol);
}

/* A minimiser allowed one step cannot leave the saddle region: after the
 * allowed rounds the result says not repaired (not an error). */
static void test_gives_up(void **state)
{
    (void)state;
    well t = {620.0, 494.0, 0.153, 111.2, 1.162};
    nd_energy pot = {well_energy, NULL, &t};
    nd_molecule mol;
    triatomic(&mol, t.r0);
    nd_minimize_options mo;
    nd_minimize_options_default(&mo);
    nd_converge_preset_modes(&mo.stop);
    mo.stop.max_steps = 1;
    mo.max_step = 0.001;
    nd_repair_opts ro = {0};
    ro.max_rounds = 2;
    ro.step = 0.001;
    ro.step_max = 0.001;
    ro.min = &mo;
    nd_repair_result r;
    assert_int_equal(nd_repair_run(&pot, &mol, NULL, &ro, NULL, NULL, &r, NULL), ND_OK);
    assert_int_equal(r.repaired, 0);
    assert_int_equal(r.rounds, 2);
    assert_int_equal(r.trials, 4);
    assert_int_equal(r.unconverged, 4);
    assert_int_equal(r.nimag_end, 1);
    assert_true(r.energy_end < r.energy_start);
    nd_molecule_free(&mol);
}

static void test_errors(void **state)
{
    (void)state;
    well t = {620.0, 494.0, 0.153, 111.2, 1.162};
    nd_energy inner = {well_energy, NULL, &t};
    nd_test_faulty f = {inner, 3, 0, 0};
    nd_energy pot = {nd_test_faulty_energy, NULL, &f};
    nd_molecule mol;
    triatomic(&mol, t.r0);
    nd_error err;
    nd_repair_result r;
    /* the faulty wrapper counts calls without locking: one thread, so call 3
     * (the second displaced structure of the first Hessian) is the one that fails */
    int saved = omp_get_max_threads();
    omp_set_num_threads(1);
    int s = nd_repair_run(&pot, &mol, NULL, NULL, NULL, NULL, &r, &err);
    omp_set_num_threads(saved);
    assert_int_equal(s, ND_ECOMPUTE);
    assert_contains(err.msg, "hessian");
    /* failing at the first call: the start structure */
    f.calls = 0;
    f.fail_at = 1;
    assert_int_equal(nd_repair_run(&pot, &mol, NULL, NULL, NULL, NULL, &r, &err), ND_ECOMPUTE);
    assert_contains(err.msg, "start structure");
    assert_int_equal(nd_repair_run(NULL, &mol, NULL, NULL, NULL, NULL, &r, &err), ND_EINVAL);
    nd_molecule_free(&mol);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_triatomic_saddle), cmocka_unit_test(test_eclipsed_ethane),
        cmocka_unit_test(test_minimum_untouched), cmocka_unit_test(test_frozen),
        cmocka_unit_test(test_gives_up),          cmocka_unit_test(test_errors),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
