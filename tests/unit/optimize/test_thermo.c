/* Ideal-gas thermochemistry against tabulated standard values.
 *
 * Tabulated values: CODATA Key Values for Thermodynamics (J. D. Cox, D. D.
 * Wagman, V. A. Medvedev, Hemisphere 1989) and NIST-JANAF Thermochemical
 * Tables (M. W. Chase, 4th ed., 1998), at 298.15 K and 1 bar. Spectroscopic
 * constants: K. P. Huber and G. Herzberg, "Constants of Diatomic
 * Molecules" (1979), as also listed in the NIST Chemistry WebBook. All of
 * these values are quoted from memory (no table at hand), to the digits we
 * are confident of.
 *
 * Tolerances follow from what RRHO leaves out, not from the results: the
 * classical rigid rotor differs from the sum over rotational levels by
 * about R theta_rot / (3 T) in S (0.03 J/mol/K for N2 and CO), the tables
 * also include centrifugal distortion and vibration-rotation coupling; for
 * H2O, with rotational temperatures of 13 to 40 K and an equilibrium
 * geometry, about 0.3 J/mol/K; for CO2 the anharmonic, Fermi-resonant
 * modes add about 0.1. */
#include "tests/lib/testutil.h"

#include "core/elements.h"
#include "core/units.h"
#include "optimize/thermo.h"

#include <math.h>
#include <string.h>

#define J(cal) ((cal) * ND_CALORIE_J) /* cal -> J */

/* Bond length of a diatomic from its rotational constant B (cm^-1):
 * I = h / (8 pi^2 c B), r = sqrt(I / mu). */
static double bond_from_b(double b, double m1, double m2)
{
    double i = ND_PLANCK_J / (8 * M_PI * M_PI * ND_LIGHT_SPEED * 100.0 * b); /* kg m^2 */
    double mu = m1 * m2 / (m1 + m2) * ND_AMU_KG;
    return sqrt(i / mu) * 1e10;
}

/* Ar: S = 154.846 J/mol/K (CODATA key value, from memory) by Sackur-Tetrode
 * alone; H(298.15) - H(0) = 6.197 kJ/mol (CODATA, from memory) = 5/2 RT,
 * Cp = 20.786 J/mol/K (5/2 R, NIST-JANAF, from memory). */
static void test_argon(void **state)
{
    (void)state;
    int z = 18;
    double m = nd_element_mass(18), x[3] = {0.1, 0.2, 0.3};
    nd_thermo t;
    assert_int_equal(nd_thermo_compute(1, &z, &m, x, -1, NULL, 0, NULL, &t, NULL), ND_OK);
    assert_close(J(t.s_total), 154.846, 0.01);
    assert_close(J(t.s_rot), 0, 0);
    assert_close(t.h_total * ND_CALORIE_J, 6.197, 0.001);
    assert_close(J(t.cp_total), 20.786, 0.001);
    assert_close(t.zpe, 0, 0);
    assert_int_equal(t.sigma, 1);
    /* Sackur-Tetrode: S changes by R ln(p1/p2) with pressure (ideal gas) */
    nd_thermo_opts o = {0};
    o.pressure = 101325.0;
    nd_thermo t2;
    assert_int_equal(nd_thermo_compute(1, &z, &m, x, -1, NULL, 0, &o, &t2, NULL), ND_OK);
    assert_close(J(t.s_total - t2.s_total), ND_GAS_CONSTANT_J * log(101325.0 / 1e5), 1e-9);
}

/* N2 (14N2): B0 = 1.98957 cm^-1, omega_e = 2358.57 cm^-1 (Huber and
 * Herzberg, from memory); sigma = 2 detected from the geometry.
 * S = 191.609 J/mol/K (CODATA, from memory), Cp = 29.124 J/mol/K
 * (NIST-JANAF, from memory), H(298.15) - H(0) = 8.670 kJ/mol (CODATA, from
 * memory; thermal part, without the zero-point energy). */
static void test_nitrogen(void **state)
{
    (void)state;
    int z[2] = {7, 7};
    double mn = nd_isotope_mass(7, 14), m[2] = {mn, mn};
    double r = bond_from_b(1.98957, mn, mn);
    assert_true(r > 1.09 && r < 1.11); /* r0 of N2 ~ 1.10 angstrom, from memory */
    double x[6] = {0.3, -0.2, 0.1, 0.3 + r * 0.6, -0.2 + r * 0.8, 0.1}, nu = 2358.57;
    nd_thermo t;
    assert_int_equal(nd_thermo_compute(2, z, m, x, -1, &nu, 1, NULL, &t, NULL), ND_OK);
    assert_int_equal(t.linear, 1);
    assert_int_equal(t.sigma, 2);
    assert_int_equal(t.sigma_detected, 1);
    assert_close(J(t.s_total), 191.609, 0.05);
    assert_close(J(t.cp_total), 29.124, 0.03);
    double thermal = t.h_total - t.zpe;
    assert_close(thermal * ND_CALORIE_J, 8.670, 0.02);
    /* zero-point energy: omega/2 in kcal/mol (1 cm^-1 = ND_WAVENUMBER_KCALMOL) */
    assert_rel_close(t.zpe, 0.5 * nu * ND_WAVENUMBER_KCALMOL, 1e-12, 0);
    /* rotational temperature theta = hcB/k = 2.86 K (from the same B) */
    assert_rel_close(t.rot_temp[0], ND_PLANCK_J * ND_LIGHT_SPEED * 100 * 1.98957 / ND_BOLTZMANN_J, 1e-9, 0);
    /* G = H - TS */
    assert_close(t.g_total, t.h_total - 298.15 * t.s_total / 1000, 1e-12);
}

/* CO (12C16O): B0 = 1.92253 cm^-1, omega_e = 2169.81 cm^-1 (Huber and
 * Herzberg, from memory), sigma = 1. S = 197.660 J/mol/K (CODATA, from
 * memory), Cp = 29.142 J/mol/K (NIST-JANAF, from memory). */
static void test_carbon_monoxide(void **state)
{
    (void)state;
    int z[2] = {6, 8};
    double m[2] = {12.0, nd_isotope_mass(8, 16)};
    double r = bond_from_b(1.92253, m[0], m[1]);
    double x[6] = {0, 0, 0, 0, 0, r}, nu = 2169.81;
    nd_thermo t;
    assert_int_equal(nd_thermo_compute(2, z, m, x, -1, &nu, 1, NULL, &t, NULL), ND_OK);
    assert_int_equal(t.sigma, 1);
    assert_close(J(t.s_total), 197.660, 0.05);
    assert_close(J(t.cp_total), 29.142, 0.05); /* NIST-JANAF, from memory */
    /* with sigma forced to 2 the entropy drops by R ln 2 */
    nd_thermo_opts o = {0};
    o.symmetry = 2;
    nd_thermo t2;
    assert_int_equal(nd_thermo_compute(2, z, m, x, -1, &nu, 1, &o, &t2, NULL), ND_OK);
    assert_int_equal(t2.sigma_detected, 0);
    assert_close(J(t.s_total - t2.s_total), ND_GAS_CONSTANT_J * log(2.0), 1e-9);
}

/* H2O: equilibrium r = 0.9578 angstrom, angle 104.48 degrees, harmonic
 * wavenumbers 3832, 1649, 3943 cm^-1 (from memory); sigma = 2 detected.
 * S = 188.835 J/mol/K (CODATA, from memory); Cp = 33.58 J/mol/K (NIST-JANAF,
 * from memory; RRHO misses about 0.15 of it at 298 K). */
static void test_water(void **state)
{
    (void)state;
    int z[3] = {8, 1, 1};
    double m[3] = {nd_isotope_mass(8, 16), nd_isotope_mass(1, 1), nd_isotope_mass(1, 1)};
    double r = 0.9578, h = 104.48 * M_PI / 360;
    double x[9] = {0, 0, 0, r * sin(h), r * cos(h), 0, -r * sin(h), r * cos(h), 0};
    double nu[3] = {1649, 3832, 3943};
    nd_thermo t;
    assert_int_equal(nd_thermo_compute(3, z, m, x, -1, nu, 3, NULL, &t, NULL), ND_OK);
    assert_int_equal(t.linear, 0);
    assert_int_equal(t.sigma, 2);
    assert_close(J(t.s_total), 188.835, 0.3);
    assert_close(J(t.cp_total), 33.58, 0.3); /* NIST-JANAF, from memory */
    /* ZPE = (1649 + 3832 + 3943) / 2 cm^-1 = 13.47 kcal/mol */
    assert_close(t.zpe, 4712.0 * ND_WAVENUMBER_KCALMOL, 1e-9);
    assert_true(t.zpe > 13.4 && t.zpe < 13.5);
    /* Cv of a non-linear rigid rotor + translation = 3R; vibrations add ~0.03 cal/mol/K */
    assert_close(t.cv_trans + t.cv_rot, 3 * ND_GAS_CONSTANT_J / ND_CALORIE_J, 1e-12);
    assert_true(t.cv_vib > 0 && t.cv_vib < 0.1);
    /* an imaginary frequency is left out and counted */
    double nu4[4] = {-150, 1649, 3832, 3943};
    nd_thermo t4;
    assert_int_equal(nd_thermo_compute(3, z, m, x, 0, nu4, 4, NULL, &t4, NULL), ND_OK);
    assert_int_equal(t4.nimag_skipped, 1);
    assert_int_equal(t4.nvib, 3);
    assert_close(t4.s_total, t.s_total, 1e-12);
}

/* CO2: r = 1.1600 angstrom (from memory), wavenumbers 667.4 (x2), 1333,
 * 2349 cm^-1 (from memory), linear, sigma = 2. S = 213.785 J/mol/K
 * (CODATA, from memory). */
static void test_carbon_dioxide(void **state)
{
    (void)state;
    int z[3] = {8, 6, 8};
    double m[3] = {nd_isotope_mass(8, 16), 12.0, nd_isotope_mass(8, 16)};
    double x[9] = {0, 0, -1.16, 0, 0, 0, 0, 0, 1.16};
    double nu[4] = {667.4, 667.4, 1333, 2349};
    nd_thermo t;
    assert_int_equal(nd_thermo_compute(3, z, m, x, -1, nu, 4, NULL, &t, NULL), ND_OK);
    assert_int_equal(t.linear, 1);
    assert_int_equal(t.sigma, 2);
    assert_close(J(t.s_total), 213.785, 0.15);
    /* Cp = 37.135 J/mol/K (NIST-JANAF, from memory): 7/2 R plus the bends, mostly */
    assert_close(J(t.cp_total), 37.135, 0.1);
}

/* Harmonic entropy of one mode tends to the classical oscillator
 * S/R = 1 + ln(kT / h nu) + u^2/24 + ... (u = h nu / kT; high-temperature
 * expansion, standard statistical mechanics); the quasi-RRHO entropy
 * (Grimme 2012) equals the mean of the two at nu = w0, follows the harmonic
 * one far above w0 and the free rotor far below, and stays finite as
 * nu -> 0, where the harmonic entropy diverges. */
static void test_quasi(void **state)
{
    (void)state;
    double t = 298.15, r = ND_GAS_CONSTANT_J / ND_CALORIE_J;
    double u = ND_PLANCK_J * ND_LIGHT_SPEED * 100 * 1.0 / (ND_BOLTZMANN_J * t);
    assert_rel_close(nd_thermo_s_harmonic(1.0, t), r * (1 - log(u) + u * u / 24), 1e-8, 0);
    double w0 = ND_THERMO_QH_W0, a = ND_THERMO_QH_ALPHA, b = ND_THERMO_QH_BAV;
    double sv = nd_thermo_s_harmonic(w0, t), sr = nd_thermo_s_free_rotor(w0, t, b);
    assert_close(nd_thermo_s_quasi(w0, t, w0, a, b), 0.5 * (sv + sr), 1e-12);
    /* weight 1 - 6e-6 on the harmonic entropy at 2000 cm^-1 */
    assert_close(nd_thermo_s_quasi(2000, t, w0, a, b), nd_thermo_s_harmonic(2000, t), 1e-5);
    assert_rel_close(nd_thermo_s_quasi(2, t, w0, a, b), nd_thermo_s_free_rotor(2, t, b), 1e-6, 0);
    /* nu -> 0: mu' -> Bav, so S_R tends to R (1/2 + ln sqrt(8 pi^3 Bav k T / h^2)) */
    double lim = r * (0.5 + 0.5 * log(8 * M_PI * M_PI * M_PI * b * ND_BOLTZMANN_J * t /
                                      (ND_PLANCK_J * ND_PLANCK_J)));
    assert_rel_close(nd_thermo_s_free_rotor(1e-9, t, b), lim, 1e-6, 0);
    assert_true(nd_thermo_s_harmonic(1e-3, t) > 2 * lim);
    /* in a molecule: quasi-RRHO lowers the entropy of soft modes only */
    int z[3] = {8, 1, 1};
    double m[3] = {15.999, 1.008, 1.008};
    double x[9] = {0, 0, 0, 0.757, 0.586, 0, -0.757, 0.586, 0};
    double soft[3] = {12.0, 1649, 3832}, stiff[3] = {1649, 3832, 3943};
    nd_thermo_opts o = {0};
    nd_thermo h1, q1, h2, q2;
    assert_int_equal(nd_thermo_compute(3, z, m, x, 0, soft, 3, &o, &h1, NULL), ND_OK);
    assert_int_equal(nd_thermo_compute(3, z, m, x, 0, stiff, 3, &o, &h2, NULL), ND_OK);
    o.quasi = 1;
    assert_int_equal(nd_thermo_compute(3, z, m, x, 0, soft, 3, &o, &q1, NULL), ND_OK);
    assert_int_equal(nd_thermo_compute(3, z, m, x, 0, stiff, 3, &o, &q2, NULL), ND_OK);
    assert_true(q1.s_vib < h1.s_vib - 1.0);
    assert_close(q2.s_vib, h2.s_vib, 0.01);
    assert_close(q1.e_vib, h1.e_vib, 0); /* Grimme's treatment changes the entropy only */
}

/* Temperature dependence: E_trans = 3/2 RT at any T; a triplet adds R ln 3. */
static void test_options(void **state)
{
    (void)state;
    int z = 18;
    double m = 39.95, x[3] = {0, 0, 0};
    nd_thermo_opts o = {0};
    o.temperature = 500.0;
    o.multiplicity = 3;
    nd_thermo t;
    assert_int_equal(nd_thermo_compute(1, &z, &m, x, -1, NULL, 0, &o, &t, NULL), ND_OK);
    assert_close(t.e_trans, 1.5 * ND_BOLTZMANN_KCALMOL * 500.0, 1e-12);
    assert_close(t.s_elec, ND_GAS_CONSTANT_J / ND_CALORIE_J * log(3.0), 1e-12);
    nd_error err;
    o.temperature = -5;
    assert_int_equal(nd_thermo_compute(1, &z, &m, x, -1, NULL, 0, &o, &t, &err), ND_EINVAL);
    assert_contains(err.msg, "temperature");
    o.temperature = 0;
    o.pressure = -1;
    assert_int_equal(nd_thermo_compute(1, &z, &m, x, -1, NULL, 0, &o, &t, &err), ND_EINVAL);
    assert_contains(err.msg, "pressure");
    double bad = 0;
    assert_int_equal(nd_thermo_compute(1, &z, &bad, x, -1, NULL, 0, NULL, &t, &err), ND_EINPUT);
    double m2[2] = {1, 1}, x2[6] = {0, 0, 0, 0, 0, 1}, nan_nu = NAN;
    assert_int_equal(nd_thermo_compute(2, NULL, m2, x2, -1, NULL, 0, NULL, &t, &err), ND_EINVAL);
    assert_contains(err.msg, "symmetry");
    int z2[2] = {1, 1};
    assert_int_equal(nd_thermo_compute(2, z2, m2, x2, -1, &nan_nu, 1, NULL, &t, &err), ND_EINPUT);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_argon),          cmocka_unit_test(test_nitrogen),
        cmocka_unit_test(test_carbon_monoxide), cmocka_unit_test(test_water),
        cmocka_unit_test(test_carbon_dioxide), cmocka_unit_test(test_quasi),
        cmocka_unit_test(test_options),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
