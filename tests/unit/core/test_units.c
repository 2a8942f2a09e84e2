/* Checks of the unit conversions against published values. */
#include "tests/lib/testutil.h"

#include "core/units.h"

/* CODATA 2018 (NIST, physics.nist.gov/cuu "energy conversion factors"):
 * 1 hartree = 27.211386245988 eV = 4.3597447222071e-18 J; 1 cal = 4.184 J.
 * 1 hartree = 2625.4996394799 kJ/mol (CODATA 2018 table of derived values). */
static void test_hartree(void **state)
{
    (void)state;
    assert_rel_close(ND_HARTREE_KCALMOL * ND_CALORIE_J, 2625.4996394799, 1e-12, 0);
    assert_rel_close(ND_HARTREE_KCALMOL / ND_EV_KCALMOL, 27.211386245988, 1e-11, 0);
}

/* CODATA 2018: 1 eV = 96.485332123 kJ/mol (Faraday constant F = 96485.33212 C/mol). */
static void test_ev(void **state)
{
    (void)state;
    assert_rel_close(ND_EV_KCALMOL * ND_CALORIE_J, 96.48533212331, 1e-11, 0);
}

/* CODATA 2018: molar gas constant R = 8.314462618 J/(mol K). */
static void test_gas_constant(void **state)
{
    (void)state;
    assert_rel_close(ND_GAS_CONSTANT_J, 8.314462618, 1e-9, 0);
    assert_rel_close(ND_BOLTZMANN_KCALMOL, 8.314462618e-3 / 4.184, 1e-9, 0);
}

/* CODATA 2018: h c = 1.98644586e-25 J m, so 1 cm^-1 = 11.96265657 J/mol
 * (NIST energy conversion factors: 1 cm^-1 = 1.239841984e-4 eV). */
static void test_wavenumber(void **state)
{
    (void)state;
    assert_rel_close(ND_WAVENUMBER_KCALMOL * ND_CALORIE_J * 1000.0, 11.96265657, 1e-8, 0);
    assert_rel_close(ND_WAVENUMBER_KCALMOL / ND_EV_KCALMOL, 1.239841984e-4, 1e-9, 0);
}

/* Gradient conversion: 1 hartree/bohr = 1185.8210 kcal/mol/angstrom
 * (627.509474 / 0.529177210903, CODATA 2018 values). */
static void test_gradient(void **state)
{
    (void)state;
    assert_rel_close(ND_HARTREE_BOHR_KCALMOL_ANGSTROM, 627.5094740631 / 0.529177210903, 1e-12, 0);
    assert_close(ND_HARTREE_BOHR_KCALMOL_ANGSTROM, 1185.8210, 1e-3);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_hartree),     cmocka_unit_test(test_ev),
        cmocka_unit_test(test_gas_constant), cmocka_unit_test(test_wavenumber),
        cmocka_unit_test(test_gradient),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
