/* The molecule model: building, copying, data items, formula and mass. */
#include "tests/lib/testutil.h"

#include "core/elements.h"
#include "core/molecule.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

static void add(nd_molecule *m, const char *sym, int count)
{
    for (int i = 0; i < count; i++)
        assert_int_equal(nd_molecule_add_atom(m, nd_element_from_symbol(sym, -1), 0.1 * m->natoms,
                                              0.0, 0.0, NULL), ND_OK);
}

/* Molar masses from the IUPAC 2021 abridged weights (Pure Appl. Chem. 94,
 * 573, 2022): caffeine C8H10N4O2 = 8(12.011) + 10(1.008) + 4(14.007) +
 * 2(15.999) = 194.194 g/mol; water 18.015 g/mol. */
static void test_mass_formula(void **state)
{
    (void)state;
    nd_molecule m;
    nd_molecule_init(&m);
    add(&m, "N", 4);
    add(&m, "C", 8);
    add(&m, "O", 2);
    add(&m, "H", 10);
    assert_close(nd_molecule_mass(&m), 194.194, 1e-9);
    char f[32];
    assert_int_equal(nd_molecule_formula(&m, f, sizeof f), 9);
    assert_string_equal(f, "C8H10N4O2");
    nd_molecule_free(&m);

    add(&m, "H", 2);
    add(&m, "O", 1);
    assert_close(nd_molecule_mass(&m), 18.015, 1e-9);
    nd_molecule_formula(&m, f, sizeof f);
    assert_string_equal(f, "H2O"); /* no carbon: alphabetical (Hill) */
    m.isotope[0] = m.isotope[1] = 2; /* D2O: 2(2.01410177812) + 15.999 */
    assert_close(nd_molecule_mass(&m), 2 * 2.01410177812 + 15.999, 1e-9);
    nd_molecule_free(&m);

    add(&m, "Cl", 1);
    add(&m, "H", 1);
    nd_molecule_formula(&m, f, sizeof f);
    assert_string_equal(f, "ClH");
    char tiny[3];
    assert_int_equal(nd_molecule_formula(&m, tiny, sizeof tiny), 3); /* needed length, truncated safely */
    nd_molecule_free(&m);
}

static void test_bonds_and_validation(void **state)
{
    (void)state;
    nd_molecule m;
    nd_molecule_init(&m);
    nd_error err;
    add(&m, "C", 3);
    assert_int_equal(nd_molecule_add_bond(&m, 0, 1, 1, &err), ND_OK);
    assert_int_equal(nd_molecule_add_bond(&m, 2, 1, 2, &err), ND_OK);
    assert_int_equal(nd_molecule_add_bond(&m, 0, 3, 1, &err), ND_EINPUT);
    assert_contains(err.msg, "outside 1..3");
    assert_int_equal(nd_molecule_add_bond(&m, 1, 1, 1, &err), ND_EINPUT);
    assert_int_equal(nd_molecule_add_bond(&m, 0, 2, 7, &err), ND_EINPUT);
    assert_contains(err.msg, "order 7");
    assert_int_equal(nd_molecule_validate(&m, &err), ND_OK);
    int *start, *adj;
    assert_int_equal(nd_molecule_neighbours(&m, &start, &adj, &err), ND_OK);
    assert_int_equal(start[1] - start[0], 1);
    assert_int_equal(start[2] - start[1], 2);
    assert_int_equal(adj[start[1]], 0);
    assert_int_equal(adj[start[1] + 1], 2);
    free(start);
    free(adj);
    m.xyz[4] = NAN;
    assert_int_equal(nd_molecule_validate(&m, &err), ND_EINPUT);
    assert_contains(err.msg, "atom 2 (C) has a non-finite coordinate");
    m.xyz[4] = 0.0;
    m.z[2] = 99;
    assert_int_equal(nd_molecule_validate(&m, &err), ND_EINPUT);
    assert_contains(err.msg, "atom 3 has atomic number 99");
    nd_molecule_free(&m);
}

static void test_data_and_copy(void **state)
{
    (void)state;
    nd_molecule m, c;
    nd_molecule_init(&m);
    nd_molecule_init(&c);
    add(&m, "O", 1);
    m.formal_charge[0] = -1;
    m.charge = -1;
    assert_int_equal(nd_molecule_set_title(&m, "hydroxide", NULL), ND_OK);
    assert_int_equal(nd_molecule_set_data(&m, "batch", "A-17", NULL), ND_OK);
    assert_int_equal(nd_molecule_set_data(&m, "note", "line one\nline two", NULL), ND_OK);
    assert_int_equal(nd_molecule_set_data(&m, "batch", "A-18", NULL), ND_OK);
    assert_int_equal(m.ndata, 2);
    assert_string_equal(m.data[0].name, "batch"); /* replaced in place: order kept */
    assert_string_equal(nd_molecule_get_data(&m, "batch"), "A-18");
    assert_null(nd_molecule_get_data(&m, "missing"));
    assert_int_equal(nd_molecule_copy(&c, &m, NULL), ND_OK);
    nd_molecule_free(&m);
    assert_string_equal(c.title, "hydroxide");
    assert_string_equal(nd_molecule_get_data(&c, "note"), "line one\nline two");
    assert_int_equal(c.formal_charge[0], -1);
    assert_int_equal(nd_molecule_formal_charge_sum(&c), -1);
    assert_int_equal(c.charge, -1);
    nd_molecule_clear(&c);
    assert_int_equal(c.natoms, 0);
    assert_int_equal(c.ndata, 0);
    nd_molecule_free(&c);
    nd_molecule_free(NULL);
}

/* Many atoms: the arrays grow without losing earlier coordinates. */
static void test_growth(void **state)
{
    (void)state;
    nd_molecule m;
    nd_molecule_init(&m);
    for (int i = 0; i < 40000; i++)
        assert_int_equal(nd_molecule_add_atom(&m, 1 + i % 9, 1.25 * i, -0.5 * i, 3.0, NULL), ND_OK);
    assert_int_equal(m.natoms, 40000);
    assert_true(m.xyz[3 * 12345] == 1.25 * 12345);
    assert_true(m.xyz[3 * 39999 + 1] == -0.5 * 39999);
    nd_molecule_free(&m);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_mass_formula), cmocka_unit_test(test_bonds_and_validation),
        cmocka_unit_test(test_data_and_copy), cmocka_unit_test(test_growth),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
