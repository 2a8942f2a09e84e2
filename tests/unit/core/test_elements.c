/* Checks of the elements table against the published tables it cites. */
#include "tests/lib/testutil.h"

#include "core/elements.h"

static void test_symbols(void **state)
{
    (void)state;
    assert_int_equal(nd_element_from_symbol("H", -1), 1);
    assert_int_equal(nd_element_from_symbol("Cl", -1), 17);
    assert_int_equal(nd_element_from_symbol("Clx", 2), 17);
    assert_int_equal(nd_element_from_symbol("Xe", -1), 54);
    assert_int_equal(nd_element_from_symbol("CL", -1), 0);
    assert_int_equal(nd_element_from_symbol("Xx", -1), 0);
    assert_int_equal(nd_element_from_symbol("", -1), 0);
    assert_int_equal(nd_element_from_symbol_anycase("CL", -1), 17);
    assert_int_equal(nd_element_from_symbol_anycase("br", -1), 35);
    assert_string_equal(nd_element_symbol(35), "Br");
    assert_string_equal(nd_element_symbol(0), "?");
    assert_string_equal(nd_element_symbol(55), "?");
    for (int z = 1; z <= ND_MAX_Z; z++) /* every symbol maps back to itself */
        assert_int_equal(nd_element_from_symbol(nd_element_symbol(z), -1), z);
}

/* IUPAC 2021 abridged standard atomic weights (Prohaska et al., Pure Appl.
 * Chem. 94, 573, 2022, Table 3): C 12.011, H 1.008, N 14.007, O 15.999,
 * S 32.06, Cl 35.45, Br 79.904, I 126.90. */
static void test_weights(void **state)
{
    (void)state;
    assert_close(nd_element_mass(6), 12.011, 1e-9);
    assert_close(nd_element_mass(1), 1.008, 1e-9);
    assert_close(nd_element_mass(7), 14.007, 1e-9);
    assert_close(nd_element_mass(8), 15.999, 1e-9);
    assert_close(nd_element_mass(16), 32.06, 1e-9);
    assert_close(nd_element_mass(17), 35.45, 1e-9);
    assert_close(nd_element_mass(35), 79.904, 1e-9);
    assert_close(nd_element_mass(53), 126.90, 0.005);
    assert_true(nd_element_mass(0) == 0.0);
    for (int z = 2; z <= ND_MAX_Z; z++) /* weights rise with Z except the known inversions */
        if (z != 19 && z != 28 && z != 53)  /* Ar>K, Co>Ni, Te>I */
            assert_true(nd_element_mass(z) > nd_element_mass(z - 1));
}

/* AME2020 (Wang et al., Chinese Phys. C 45, 030003, 2021): 1H 1.00782503223,
 * 2H 2.01410177812, 12C exactly 12 by definition of the dalton. */
static void test_isotopes(void **state)
{
    (void)state;
    assert_close(nd_isotope_mass(1, 1), 1.00782503223, 1e-11);
    assert_close(nd_isotope_mass(1, 2), 2.01410177812, 1e-11);
    assert_true(nd_isotope_mass(6, 12) == 12.0);
    assert_close(nd_isotope_mass(6, 0), 12.011, 1e-12);
    assert_true(nd_isotope_mass(6, 99) == 0.0);
}

/* Cordero et al., Dalton Trans. 2008, 2832, Table 2: H 0.31, C(sp3) 0.76,
 * N 0.71, O 0.66, F 0.57, S 1.05, Cl 1.02, Br 1.20, I 1.39 angstrom. */
static void test_radii(void **state)
{
    (void)state;
    const int z[] = {1, 6, 7, 8, 9, 16, 17, 35, 53};
    const double r[] = {0.31, 0.76, 0.71, 0.66, 0.57, 1.05, 1.02, 1.20, 1.39};
    for (int i = 0; i < 9; i++)
        assert_close(nd_element_covalent_radius(z[i]), r[i], 1e-12);
    for (int k = 1; k <= ND_MAX_Z; k++)
        assert_true(nd_element_covalent_radius(k) > 0.2 && nd_element_covalent_radius(k) < 2.5);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_symbols), cmocka_unit_test(test_weights),
        cmocka_unit_test(test_isotopes), cmocka_unit_test(test_radii),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
