/* Rotational symmetry numbers of molecules with known point groups.
 *
 * The point groups and their rotation counts are standard (e.g. F. A.
 * Cotton, "Chemical Applications of Group Theory", 3rd ed., Wiley 1990; the
 * symmetry numbers of thermochemical tables: H2O 2, NH3 3, CH4 12, C6H6 12,
 * C2H6 6, CO2 2, HCN 1). Geometries are idealised with bond lengths from
 * memory; only their symmetry matters. Every molecule is turned and shifted
 * so that no axis lies along a coordinate axis. */
#include "tests/lib/testutil.h"

#include "core/elements.h"
#include "optimize/symmetry.h"

#include <math.h>
#include <string.h>

#define MAXA 64

typedef struct {
    int n;
    int z[MAXA];
    double m[MAXA];
    double x[3 * MAXA];
} mol;

static void add(mol *a, int z, double x, double y, double zc)
{
    a->z[a->n] = z;
    a->m[a->n] = nd_element_mass(z);
    a->x[3 * a->n] = x;
    a->x[3 * a->n + 1] = y;
    a->x[3 * a->n + 2] = zc;
    a->n++;
}

/* Turns by unround Euler angles and shifts. */
static void place(mol *a)
{
    double al = 0.717, be = 1.913, ga = -0.389, sh[3] = {1.37, -0.52, 2.21};
    double ca = cos(al), sa = sin(al), cb = cos(be), sb = sin(be), cg = cos(ga), sg = sin(ga);
    double r[9] = {ca * cb * cg - sa * sg, -ca * cb * sg - sa * cg, ca * sb,
                   sa * cb * cg + ca * sg, -sa * cb * sg + ca * cg, sa * sb,
                   -sb * cg,               sb * sg,                 cb};
    for (int i = 0; i < a->n; i++) {
        double v[3] = {a->x[3 * i], a->x[3 * i + 1], a->x[3 * i + 2]};
        for (int k = 0; k < 3; k++)
            a->x[3 * i + k] = r[3 * k] * v[0] + r[3 * k + 1] * v[1] + r[3 * k + 2] * v[2] + sh[k];
    }
}

static int sigma_of(mol *a)
{
    place(a);
    nd_symmetry s;
    assert_int_equal(nd_symmetry_find(a->n, a->z, a->m, a->x, 0, &s, NULL), ND_OK);
    return s.sigma;
}

static void ring(mol *a, int z, int count, double radius, double height, double phase)
{
    for (int k = 0; k < count; k++) {
        double t = phase + 2 * M_PI * k / count;
        add(a, z, radius * cos(t), radius * sin(t), height);
    }
}

static void water(mol *a)
{
    memset(a, 0, sizeof *a);
    double r = 0.9578, h = 104.48 * M_PI / 360;
    add(a, 8, 0, 0, 0);
    add(a, 1, r * sin(h), r * cos(h), 0);
    add(a, 1, -r * sin(h), r * cos(h), 0);
}

static void methane(mol *a)
{
    memset(a, 0, sizeof *a);
    double s = 1.09 / sqrt(3.0);
    add(a, 6, 0, 0, 0);
    add(a, 1, s, s, s);
    add(a, 1, s, -s, -s);
    add(a, 1, -s, s, -s);
    add(a, 1, -s, -s, s);
}

static void ethane(mol *a, double phase)
{
    memset(a, 0, sizeof *a);
    add(a, 6, 0, 0, 0.765);
    add(a, 6, 0, 0, -0.765);
    ring(a, 1, 3, 1.02, 1.16, 0);
    ring(a, 1, 3, 1.02, -1.16, phase);
}

static void test_small(void **state)
{
    (void)state;
    mol a;
    water(&a);
    assert_int_equal(sigma_of(&a), 2); /* C2v */
    memset(&a, 0, sizeof a);
    add(&a, 7, 0, 0, 0.38);
    ring(&a, 1, 3, 0.94, 0, 0.3);
    assert_int_equal(sigma_of(&a), 3); /* NH3, C3v */
    methane(&a);
    assert_int_equal(sigma_of(&a), 12); /* Td */
    memset(&a, 0, sizeof a);
    ring(&a, 6, 6, 1.39, 0, 0.1);
    ring(&a, 1, 6, 2.47, 0, 0.1);
    assert_int_equal(sigma_of(&a), 12); /* benzene, D6h */
    ethane(&a, M_PI / 3);
    assert_int_equal(sigma_of(&a), 6); /* staggered, D3d */
    ethane(&a, 0);
    assert_int_equal(sigma_of(&a), 6); /* eclipsed, D3h */
    ethane(&a, 0.41);
    assert_int_equal(sigma_of(&a), 6); /* twisted, D3: still C3 and three C2 */
    memset(&a, 0, sizeof a);
    add(&a, 6, 0, 0, 0.667);
    add(&a, 6, 0, 0, -0.667);
    add(&a, 1, 0.923, 0, 1.238);
    add(&a, 1, -0.923, 0, 1.238);
    add(&a, 1, 0.923, 0, -1.238);
    add(&a, 1, -0.923, 0, -1.238);
    assert_int_equal(sigma_of(&a), 4); /* ethylene, D2h */
    memset(&a, 0, sizeof a);
    add(&a, 6, 0, 0, 0);
    add(&a, 6, 0, 0, 1.31);
    add(&a, 6, 0, 0, -1.31);
    add(&a, 1, 0.93, 0, 1.87);
    add(&a, 1, -0.93, 0, 1.87);
    add(&a, 1, 0, 0.93, -1.87);
    add(&a, 1, 0, -0.93, -1.87);
    assert_int_equal(sigma_of(&a), 4); /* allene, D2d */
    memset(&a, 0, sizeof a);
    add(&a, 8, 0.7375, 0, 0); /* H2O2, C2 (dihedral 112 degrees) */
    add(&a, 8, -0.7375, 0, 0);
    double d = 112 * M_PI / 360, hy = 0.967 * sin(100 * M_PI / 180), hx = 0.7375 + 0.967 * cos(80 * M_PI / 180);
    add(&a, 1, hx, hy * cos(d), hy * sin(d));
    add(&a, 1, -hx, hy * cos(d), -hy * sin(d));
    assert_int_equal(sigma_of(&a), 2);
    memset(&a, 0, sizeof a);
    add(&a, 6, 0, 0, 0); /* CHFClBr: no symmetry */
    add(&a, 1, 0.63, 0.63, 0.63);
    add(&a, 9, 0.78, -0.78, -0.78);
    add(&a, 17, -1.02, 1.02, -1.02);
    add(&a, 35, -1.12, -1.12, 1.12);
    assert_int_equal(sigma_of(&a), 1);
}

static void test_linear(void **state)
{
    (void)state;
    mol a;
    nd_symmetry s;
    memset(&a, 0, sizeof a);
    add(&a, 8, 0, 0, -1.16);
    add(&a, 6, 0, 0, 0);
    add(&a, 8, 0, 0, 1.16);
    place(&a);
    assert_int_equal(nd_symmetry_find(a.n, a.z, a.m, a.x, 0, &s, NULL), ND_OK);
    assert_int_equal(s.linear, 1);
    assert_int_equal(s.sigma, 2); /* CO2, D-infinity-h */
    memset(&a, 0, sizeof a);
    add(&a, 1, 0, 0, -1.066);
    add(&a, 6, 0, 0, 0);
    add(&a, 7, 0, 0, 1.153);
    assert_int_equal(sigma_of(&a), 1); /* HCN, C-infinity-v */
    memset(&a, 0, sizeof a);
    add(&a, 7, 0, 0, 0);
    add(&a, 7, 0.3, 0.9, -0.4);
    assert_int_equal(sigma_of(&a), 2); /* N2 */
    memset(&a, 0, sizeof a);
    add(&a, 18, 0.2, 0.3, 0.4);
    assert_int_equal(nd_symmetry_find(1, a.z, a.m, a.x, 0, &s, NULL), ND_OK);
    assert_int_equal(s.sigma, 1);
    assert_int_equal(s.linear, 0);
}

/* Higher groups: C5H5 ring (D5h, 10), SF6 (Oh, 24), cubane (Oh, 24), and a
 * C20 dodecahedron (Ih, 60) from the vertices (+-1, +-1, +-1),
 * (0, +-1/phi, +-phi) and cyclic permutations (phi the golden ratio). */
static void test_high(void **state)
{
    (void)state;
    mol a;
    nd_symmetry s;
    memset(&a, 0, sizeof a);
    ring(&a, 6, 5, 1.20, 0, 0);
    ring(&a, 1, 5, 2.28, 0, 0);
    assert_int_equal(sigma_of(&a), 10);
    memset(&a, 0, sizeof a);
    add(&a, 16, 0, 0, 0);
    for (int k = 0; k < 3; k++)
        for (int sg = -1; sg <= 1; sg += 2) {
            double v[3] = {0, 0, 0};
            v[k] = 1.56 * sg;
            add(&a, 9, v[0], v[1], v[2]);
        }
    assert_int_equal(sigma_of(&a), 24);
    memset(&a, 0, sizeof a);
    for (int i = 0; i < 8; i++) {
        double v[3] = {(i & 1) ? 0.78 : -0.78, (i & 2) ? 0.78 : -0.78, (i & 4) ? 0.78 : -0.78};
        add(&a, 6, v[0], v[1], v[2]);
        add(&a, 1, v[0] * 1.81, v[1] * 1.81, v[2] * 1.81);
    }
    assert_int_equal(sigma_of(&a), 24);
    memset(&a, 0, sizeof a);
    double ph = (1 + sqrt(5.0)) / 2, sc = 1.45 / (2 / ph); /* scaled to an edge of 1.45 angstrom */
    for (int i = 0; i < 8; i++)
        add(&a, 6, sc * ((i & 1) ? 1 : -1), sc * ((i & 2) ? 1 : -1), sc * ((i & 4) ? 1 : -1));
    for (int p = 0; p < 3; p++)
        for (int i = 0; i < 4; i++) {
            double v[3];
            v[p] = 0;
            v[(p + 1) % 3] = sc * ((i & 1) ? 1 : -1) / ph;
            v[(p + 2) % 3] = sc * ((i & 2) ? 1 : -1) * ph;
            add(&a, 6, v[0], v[1], v[2]);
        }
    place(&a);
    assert_int_equal(nd_symmetry_find(a.n, a.z, a.m, a.x, 0, &s, NULL), ND_OK);
    assert_int_equal(s.sigma, 60);
    assert_int_equal(s.max_order, 5);
    assert_int_equal(s.naxes, 6 + 10 + 15);
}

/* Isotopes count as different atoms: HDO has no C2. */
static void test_isotopes(void **state)
{
    (void)state;
    mol a;
    water(&a);
    a.m[1] = nd_isotope_mass(1, 2);
    assert_int_equal(sigma_of(&a), 1);
    water(&a);
    a.m[1] = a.m[2] = nd_isotope_mass(1, 2);
    assert_int_equal(sigma_of(&a), 2); /* D2O */
}

/* Tolerance: noise of 0.005 angstrom (a loosely minimised structure) keeps
 * Td; stretching one C-H by 0.3 angstrom leaves C3v; a tolerance below the
 * noise finds nothing. */
static void test_tolerance(void **state)
{
    (void)state;
    static const double noise[15] = {0.002, -0.004, 0.003, -0.003, 0.001, 0.004, 0.004, 0.002, -0.001,
                                     -0.002, -0.003, 0.002, 0.001, 0.003, -0.004};
    mol a;
    methane(&a);
    for (int i = 0; i < 15; i++)
        a.x[i] += noise[i];
    place(&a);
    nd_symmetry s;
    assert_int_equal(nd_symmetry_find(a.n, a.z, a.m, a.x, 0, &s, NULL), ND_OK);
    assert_int_equal(s.sigma, 12);
    assert_int_equal(nd_symmetry_find(a.n, a.z, a.m, a.x, 1e-4, &s, NULL), ND_OK);
    assert_int_equal(s.sigma, 1);
    methane(&a);
    for (int k = 0; k < 3; k++)
        a.x[3 + k] *= 1.3 / 1.09;
    assert_int_equal(sigma_of(&a), 3);
}

static void test_errors(void **state)
{
    (void)state;
    mol a;
    water(&a);
    nd_symmetry s;
    nd_error err;
    assert_int_equal(nd_symmetry_find(0, a.z, a.m, a.x, 0, &s, &err), ND_EINVAL);
    a.x[4] = NAN;
    assert_int_equal(nd_symmetry_find(a.n, a.z, a.m, a.x, 0, &s, &err), ND_EINPUT);
    assert_contains(err.msg, "atom 2");
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_small),     cmocka_unit_test(test_linear),
        cmocka_unit_test(test_high),      cmocka_unit_test(test_isotopes),
        cmocka_unit_test(test_tolerance), cmocka_unit_test(test_errors),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
