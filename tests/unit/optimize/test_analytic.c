/* The analytic test potentials of tests/lib/analytic.c: exact gradients
 * (central finite differences), known values, invariances, the molecule
 * generator, and their error paths. */
#include "tests/lib/testutil.h"

#include "core/molecule.h"
#include "tests/lib/analytic.h"

#include <math.h>
#include <string.h>

/* Central differences with h = 1e-5 have truncation error ~h^2 f''' / 6
 * (~1e-9 here) and rounding ~eps |E| / h (~1e-10): 1e-6 is a safe bound. */
static const double FD_H = 1e-5, FD_TOL = 1e-6;

static void test_lj(void **state)
{
    (void)state;
    /* argon-like parameters (from memory; any values do): a dimer at
     * r = 2^(1/6) sigma has E = -epsilon and zero force (analytic) */
    nd_test_lj lj = {0.2385, 3.405};
    double r = pow(2.0, 1.0 / 6.0) * 3.405, x[6] = {0.1, -0.2, 0.3, 0.1 + r, -0.2, 0.3}, e, g[6];
    assert_int_equal(nd_test_lj_energy(&lj, 2, x, &e, g), ND_OK);
    assert_close(e, -0.2385, 1e-14);
    for (int i = 0; i < 6; i++)
        assert_close(g[i], 0, 1e-13);
    nd_test_lj unit = {1, 1};
    nd_energy pot = {nd_test_lj_energy, NULL, &unit};
    double c[39];
    nd_test_lj13_icosahedron(1.0, c);
    for (int k = 1; k < 13; k++)
        assert_close(sqrt(c[3 * k] * c[3 * k] + c[3 * k + 1] * c[3 * k + 1] + c[3 * k + 2] * c[3 * k + 2]),
                     pow(2.0, 1.0 / 6.0), 1e-14);
    nd_test_perturb(13, c, 0.06, 11);
    double fd = nd_test_gradient_error(&pot, 13, c, FD_H);
    assert_true(fd >= 0 && fd < FD_TOL);
    x[3] = x[0];
    x[4] = x[1];
    x[5] = x[2];
    assert_int_equal(nd_test_lj_energy(&lj, 2, x, &e, g), ND_ECOMPUTE);
}

static void test_morse(void **state)
{
    (void)state;
    nd_test_morse m = {109.47, 1.9385, 0.7416};
    double x[6] = {0, 0, 0, 0.7416 + 1 / 1.9385, 0, 0}, e;
    assert_int_equal(nd_test_morse_energy(&m, 2, x, &e, NULL), ND_OK);
    assert_close(e, 109.47 * pow(1 - exp(-1.0), 2), 1e-12); /* E(r_e + 1/a) = D (1 - 1/e)^2 */
    nd_energy pot = {nd_test_morse_energy, NULL, &m};
    double y[12] = {0.1, 0.2, -0.3, 0.9, 0.1, 0.05, -0.4, 0.8, 0.2, 0.35, -0.6, 0.7};
    double fd = nd_test_gradient_error(&pot, 4, y, FD_H);
    assert_true(fd >= 0 && fd < FD_TOL);
    x[3] = 0;
    assert_int_equal(nd_test_morse_energy(&m, 2, x, &e, NULL), ND_ECOMPUTE);
}

static void test_harmonic_rosenbrock(void **state)
{
    (void)state;
    double k[6] = {0.37, 1.9, 12.5, 85.3, 410.2, 1210.0}, c[6] = {0.2, -0.3, 0.45, 1.1, -0.7, 0.05};
    nd_test_harmonic h = {k, c};
    nd_energy ph = {nd_test_harmonic_energy, NULL, &h};
    double x[6] = {0.31, -0.12, 0.5, 1.02, -0.66, 0.1}, e;
    double fd = nd_test_gradient_error(&ph, 2, x, FD_H);
    assert_true(fd >= 0 && fd < 1e-5); /* rounding at k = 1210 */
    assert_int_equal(nd_test_harmonic_energy(&h, 2, c, &e, NULL), ND_OK);
    assert_true(e == 0);
    nd_test_rosenbrock rb = {2};
    double r0[3] = {-1.2, 1.0, 1.0};
    assert_int_equal(nd_test_rosenbrock_energy(&rb, 1, r0, &e, NULL), ND_OK);
    assert_close(e, 24.2, 1e-12); /* f(-1.2, 1) = 100 (1 - 1.44)^2 + 2.2^2 = 24.2 */
    nd_test_rosenbrock r10 = {10};
    nd_energy pr = {nd_test_rosenbrock_energy, NULL, &r10};
    double y[12] = {0.213, 0.571, -0.262, 0.813, 0.094, 0.447, 1.385, 0.726, -0.118, 0.652, 2.31, -0.41};
    fd = nd_test_gradient_error(&pr, 4, y, FD_H);
    assert_true(fd >= 0 && fd < FD_TOL * 10);
    double ones[12];
    for (int i = 0; i < 12; i++)
        ones[i] = 1;
    assert_int_equal(nd_test_rosenbrock_energy(&r10, 4, ones, &e, NULL), ND_OK);
    assert_true(e == 0);
    nd_test_rosenbrock bad = {11};
    assert_int_equal(nd_test_rosenbrock_energy(&bad, 3, y, &e, NULL), ND_EINVAL);
    bad.dim = 1;
    assert_int_equal(nd_test_rosenbrock_energy(&bad, 3, y, &e, NULL), ND_EINVAL);
}

/* Expected formulas of the generated molecules (Hill order). */
static const char *FORMULAS[] = {
    "C2H6", "C3H8", "C4H10", "C5H12", "C6H14", "C8H18", "C10H22", "C4H10", "C5H12", "C5H12",
    "CH4O", "C2H6O", "C3H8O", "C2H6O2", "C2H6O", "C4H10O", "CH5N", "C2H7N", "C2H6S", "C2H5Cl",
    "C3H7F", "C6H12", "C7H14", "C6H12O", "C6H6", "C7H8", "C6H6O", "C8H10", "C6H5Cl"};

static void test_molecules(void **state)
{
    (void)state;
    assert_int_equal(nd_test_molecule_count(), (int)(sizeof FORMULAS / sizeof FORMULAS[0]));
    assert_true(nd_test_molecule_count() >= 20);
    nd_molecule m;
    nd_molecule_init(&m);
    nd_error err;
    for (int i = 0; i < nd_test_molecule_count(); i++) {
        assert_int_equal(nd_test_molecule_build(i, &m, &err), ND_OK);
        char f[32];
        nd_molecule_formula(&m, f, sizeof f);
        assert_string_equal(f, FORMULAS[i]);
        assert_string_equal(m.title, nd_test_molecule_name(i));
        assert_int_equal(nd_molecule_validate(&m, &err), ND_OK);
        int rings = strstr(nd_test_molecule_name(i), "cyclo") || strstr(FORMULAS[i], "C6H6") ||
                    strstr(nd_test_molecule_name(i), "benz") || strstr(nd_test_molecule_name(i), "tolu") ||
                    strstr(nd_test_molecule_name(i), "phenol");
        assert_int_equal(m.nbonds, m.natoms - 1 + rings);
        /* no two unbonded atoms closer than 1.6 A (geminal H-H is ~1.75) */
        for (int a = 0; a < m.natoms; a++)
            for (int b = a + 1; b < m.natoms; b++) {
                int bonded = 0;
                for (int k = 0; k < m.nbonds; k++)
                    bonded |= (m.bonds[k].a == a && m.bonds[k].b == b) || (m.bonds[k].a == b && m.bonds[k].b == a);
                double d = 0;
                for (int c = 0; c < 3; c++)
                    d += pow(m.xyz[3 * a + c] - m.xyz[3 * b + c], 2);
                assert_true(bonded ? sqrt(d) > 0.9 && sqrt(d) < 1.9 : sqrt(d) > 1.6);
            }
    }
    assert_null(nd_test_molecule_name(-1));
    assert_int_equal(nd_test_molecule_build(-1, &m, &err), ND_EINVAL);
    assert_int_equal(nd_test_molecule_build(nd_test_molecule_count(), &m, &err), ND_EINVAL);
    nd_molecule_free(&m);
}

static void test_bonded(void **state)
{
    (void)state;
    nd_molecule m;
    nd_molecule_init(&m);
    nd_error err;
    int count = nd_test_sanitized() ? 8 : nd_test_molecule_count();
    for (int i = 0; i < count; i++) {
        assert_int_equal(nd_test_molecule_build(i, &m, &err), ND_OK);
        nd_test_bonded *b;
        assert_int_equal(nd_test_bonded_new(&b, &m, &err), ND_OK);
        nd_energy pot = {nd_test_bonded_energy, NULL, b};
        nd_test_perturb(m.natoms, m.xyz, 0.08, 4242 + (uint64_t)i);
        double fd = nd_test_gradient_error(&pot, m.natoms, m.xyz, FD_H);
        assert_true(fd >= 0 && fd < 1e-5);
        /* rigid rotation about an unround axis and a translation leave E unchanged */
        double e0, e1, ax[3] = {0.267, -0.535, 0.802}, t = 0.913, ct = cos(t), st = sin(t);
        double an = sqrt(ax[0] * ax[0] + ax[1] * ax[1] + ax[2] * ax[2]);
        for (int c = 0; c < 3; c++)
            ax[c] /= an;
        nd_test_bonded_energy(b, m.natoms, m.xyz, &e0, NULL);
        double y[3 * 64];
        for (int a = 0; a < m.natoms; a++) {
            const double *p = m.xyz + 3 * a;
            double d = ax[0] * p[0] + ax[1] * p[1] + ax[2] * p[2];
            double cr[3] = {ax[1] * p[2] - ax[2] * p[1], ax[2] * p[0] - ax[0] * p[2], ax[0] * p[1] - ax[1] * p[0]};
            for (int c = 0; c < 3; c++)
                y[3 * a + c] = p[c] * ct + cr[c] * st + ax[c] * d * (1 - ct) + 1.7 * (c + 1);
        }
        nd_test_bonded_energy(b, m.natoms, y, &e1, NULL);
        assert_close(e1, e0, 1e-9 * (1 + fabs(e0)));
        double e;
        assert_int_equal(nd_test_bonded_energy(b, m.natoms - 1, y, &e, NULL), ND_EINVAL);
        memcpy(y + 3, y, 3 * sizeof *y); /* atoms 1 and 2 coincide */
        assert_int_equal(nd_test_bonded_energy(b, m.natoms, y, &e, NULL), ND_ECOMPUTE);
        nd_test_bonded_free(b);
    }
    nd_test_bonded_free(NULL);
    /* no bond table */
    nd_molecule_clear(&m);
    nd_molecule_add_atom(&m, 6, 0, 0, 0, &err);
    nd_molecule_add_atom(&m, 8, 1.2, 0, 0, &err);
    nd_test_bonded *b = (nd_test_bonded *)&m;
    assert_int_equal(nd_test_bonded_new(&b, &m, &err), ND_EINPUT);
    assert_null(b);
    assert_contains(err.msg, "no bond table");
    nd_molecule_free(&m);
}

static void test_faulty(void **state)
{
    (void)state;
    nd_test_lj lj = {1, 1};
    double x[6] = {0, 0, 0, 1.13, 0.2, 0}, e, g[6];
    for (int mode = 0; mode <= 4; mode++) {
        nd_test_faulty f = {{nd_test_lj_energy, NULL, &lj}, 2, mode, 0};
        assert_int_equal(nd_test_faulty_energy(&f, 2, x, &e, g), ND_OK);
        double g0 = g[0];
        int s = nd_test_faulty_energy(&f, 2, x, &e, g);
        assert_int_equal(f.calls, 2);
        switch (mode) {
        case 0: assert_int_equal(s, ND_ECOMPUTE); break;
        case 1: assert_int_equal(s, ND_OK); assert_true(isnan(e)); break;
        case 2: assert_int_equal(s, ND_OK); assert_true(isnan(g[4])); break;
        case 3: assert_int_equal(s, ND_EDOMAIN); break;
        default: assert_int_equal(s, ND_OK); assert_true(g[0] == -g0); break;
        }
    }
    nd_test_faulty f = {{nd_test_lj_energy, NULL, &lj}, 1, 0, 0};
    nd_energy pot = {nd_test_faulty_energy, NULL, &f};
    assert_true(nd_test_gradient_error(&pot, 2, x, FD_H) < 0);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_lj),        cmocka_unit_test(test_morse),  cmocka_unit_test(test_harmonic_rosenbrock),
        cmocka_unit_test(test_molecules), cmocka_unit_test(test_bonded), cmocka_unit_test(test_faulty),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
