/* XYZ reading and writing: frames, titles, symbols in any case, atomic
 * numbers, extra columns, every error path, and exact round trips. */
#include "tests/lib/testutil.h"

#include "core/elements.h"
#include "core/rng.h"
#include "core/xyz.h"

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

/* Reads every frame of text; returns the number read OK and stores the
 * last error message in err. */
typedef struct {
    int ok, failed;
    nd_molecule last;
    char first_error[ND_ERROR_MSG_MAX];
    int first_error_record;
} read_result;

static void read_all(const char *text, read_result *res)
{
    nd_lines l;
    nd_lines_init(&l, "t.xyz", "frame", text, strlen(text), NULL);
    memset(res, 0, sizeof *res);
    nd_molecule_init(&res->last);
    nd_molecule m;
    nd_molecule_init(&m);
    nd_error err;
    for (int guard = 0; guard < 1000; guard++) {
        int s = nd_xyz_read(&l, &m, &err);
        if (s == ND_END)
            break;
        if (s == ND_OK) {
            res->ok++;
            assert_int_equal(nd_molecule_copy(&res->last, &m, NULL), ND_OK);
        } else {
            assert_int_equal(s, ND_EINPUT);
            if (!res->failed++) {
                snprintf(res->first_error, sizeof res->first_error, "%s", err.msg);
                res->first_error_record = l.record;
            }
        }
    }
    nd_molecule_free(&m);
    nd_lines_free(&l);
}

/* A water frame with the experimental gas-phase geometry (r(OH) = 0.9572 A,
 * angle 104.52 degrees: from memory of the usual textbook values). */
static void test_read_single(void **state)
{
    (void)state;
    read_result r;
    read_all("3\nwater, gas phase  \nO 0.0 0.0 0.0\nH 0.0 0.0 0.9572\nH 0.926627 0.0 -0.239987\n", &r);
    assert_int_equal(r.ok, 1);
    assert_int_equal(r.failed, 0);
    assert_int_equal(r.last.natoms, 3);
    assert_int_equal(r.last.z[0], 8);
    assert_int_equal(r.last.z[2], 1);
    assert_string_equal(r.last.title, "water, gas phase"); /* trailing blanks trimmed */
    assert_int_equal(r.last.dimension, 3);
    assert_int_equal(r.last.has_bonds, 0);
    assert_true(r.last.xyz[5] == 0.9572);
    assert_true(r.last.xyz[8] == -0.239987);
    nd_molecule_free(&r.last);
}

/* Many frames, any case, atomic numbers, extra columns, blank lines
 * between frames, CRLF line ends, Fortran D exponents. */
static void test_read_variants(void **state)
{
    (void)state;
    read_result r;
    const char *text = "2\r\nfirst\r\ncl 0 0 0\r\nH 1.2745 0 0\r\n"
                       "\n\n"
                       "2\n\nCL 0 0 0 0.125 -0.5 extra words\n1 1.2745D+00 0 0\n"
                       "1\nthird\n 35   -1.5e-3  2.25E+1 +3.75\n";
    read_all(text, &r);
    assert_int_equal(r.ok, 3);
    assert_int_equal(r.failed, 0);
    assert_int_equal(r.last.z[0], 35);
    assert_true(r.last.xyz[0] == -1.5e-3);
    assert_true(r.last.xyz[1] == 22.5);
    assert_true(r.last.xyz[2] == 3.75);
    nd_molecule_free(&r.last);

    read_all("2\n\nCL 0 0 0 0.125\n1 1.2745D+00 0 0\n", &r);
    assert_int_equal(r.ok, 1);
    assert_int_equal(r.last.z[0], 17);
    assert_int_equal(r.last.z[1], 1);
    assert_true(r.last.xyz[3] == 1.2745);
    assert_null(r.last.title); /* empty comment line: no title */
    nd_molecule_free(&r.last);
}

/* One case per error path: the message names file, frame and line and says
 * what was expected; the next frame is still read. */
static void test_errors(void **state)
{
    (void)state;
    static const struct {
        const char *text, *msg;
        int good; /* frames still read */
    } cases[] = {
        {"x\ntitle\nH 0 0 0\n1\nok\nH 0 0 0\n", "t.xyz, frame 1, line 1: expected the atom count", 1},
        {"3 atoms\nt\n", "frame 1, line 1: expected the atom count", 0},
        {"-2\nt\n", "expected the atom count", 0},
        {"0\nt\n1\nok\nH 0 0 0\n", "atom count 0; expected 1..", 1},
        {"99999999999\nt\n", "atom count 99999999999", 0},
        {"99999999999999999999999\nt\n", "expected the atom count", 0},
        {"2\n", "input ends after the count line", 0},
        {"3\nt\nO 0 0 0\nH 0 0 1\n", "frame 1, line 4: input ends after 2 of 3 atom lines", 0},
        {"3\nt\nO 0 0 0\nH 0 0 1\n1\nnext\nH 0 0 0\n",
         "frame 1, line 5: found a lone number where atom 3 of 3", 1},
        {"3\nt\nO 0 0 0\n\nH 0 0 1\n1\nn\nH 0 0 0\n", "line 4: blank line where atom 2 of 3", 1},
        {"1\nt\nXx 0 0 0\n1\nok\nH 0 0 0\n", "line 3: atom 1 of 1: unknown element 'Xx'", 1},
        {"1\nt\n55 0 0 0\n", "unknown element '55'", 0},
        {"1\nt\n0 0 0 0\n", "unknown element '0'", 0},
        {"1\nt\nCarbon 0 0 0\n", "unknown element 'Carbon'", 0},
        {"1\nt\nH 0 0\n", "found 3 fields; expected an element and x y z", 0},
        {"1\nt\nH 0 abc 0\n", "y coordinate 'abc' is not a number", 0},
        {"1\nt\nH 0 0 1.2.3\n", "z coordinate '1.2.3' is not a number", 0},
        {"1\nt\nH 0x10 0 0\n", "x coordinate '0x10' is not a number", 0},
        {"1\nt\nH nan 0 0\n", "x coordinate 'nan' is not finite", 0},
        {"1\nt\nH 0 -inf 0\n", "y coordinate '-inf' is not finite", 0},
        {"1\nt\nH 0 0 1e999\n", "z coordinate '1e999' is not finite", 0},
        {"1\nt\nH 0 0 Infinity\n", "not finite", 0},
        {"2\nt\nH 0 0 nan\nH 0 0 0\n1\nok\nH 1 1 1\n", "frame 1, line 3", 1},
    };
    for (size_t i = 0; i < sizeof cases / sizeof cases[0]; i++) {
        read_result r;
        read_all(cases[i].text, &r);
        if (r.failed != 1 || r.ok != cases[i].good || !strstr(r.first_error, cases[i].msg))
            print_error("case %zu: ok %d failed %d message '%s'\n", i, r.ok, r.failed, r.first_error);
        assert_int_equal(r.failed, 1);
        assert_int_equal(r.ok, cases[i].good);
        assert_contains(r.first_error, cases[i].msg);
        assert_contains(r.first_error, "t.xyz, frame 1");
        nd_molecule_free(&r.last);
    }
}

/* An error in frame 2 reports frame 2; frames 1 and 3 read. */
static void test_error_record_number(void **state)
{
    (void)state;
    read_result r;
    read_all("1\na\nH 0 0 0\n2\nb\nH 0 0 0\nQ 1 1 1\n1\nc\nHe 2 2 2\n", &r);
    assert_int_equal(r.ok, 2);
    assert_int_equal(r.failed, 1);
    assert_int_equal(r.first_error_record, 2);
    assert_contains(r.first_error, "t.xyz, frame 2, line 7: atom 2 of 2: unknown element 'Q'");
    assert_string_equal(r.last.title, "c");
    nd_molecule_free(&r.last);
}

/* Seeded round trip: random coordinates of every magnitude (including
 * values that need 17 digits, -0 and subnormal-free tiny numbers) go to
 * text and back bit for bit; the text of the second write equals the first. */
static void test_round_trip_exact(void **state)
{
    (void)state;
    nd_rng rng;
    nd_rng_seed(&rng, 20261201);
    nd_molecule m;
    nd_molecule_init(&m);
    int n = nd_test_sanitized() ? 200 : 2000;
    for (int i = 0; i < n; i++) {
        double v[3];
        for (int k = 0; k < 3; k++) {
            double mag = pow(10.0, -6.0 + 12.0 * nd_rng_uniform(&rng));
            v[k] = (nd_rng_uniform(&rng) - 0.5) * mag;
        }
        if (i == 0)
            v[0] = -0.0, v[1] = 0.1 + 0.2, v[2] = 1.4246;
        assert_int_equal(nd_molecule_add_atom(&m, 1 + (int)nd_rng_below(&rng, ND_MAX_Z), v[0],
                                              v[1], v[2], NULL),
                         ND_OK);
    }
    m.dimension = 3;
    assert_int_equal(nd_molecule_set_title(&m, "round trip\nwith a line break", NULL), ND_OK);
    char *buf = NULL, *buf2 = NULL;
    size_t len = 0, len2 = 0;
    FILE *f = open_memstream(&buf, &len);
    assert_int_equal(nd_xyz_write(f, &m, NULL), ND_OK);
    fclose(f);

    nd_lines l;
    nd_lines_init(&l, "mem", "frame", buf, len, NULL);
    nd_molecule back;
    nd_molecule_init(&back);
    nd_error err;
    assert_int_equal(nd_xyz_read(&l, &back, &err), ND_OK);
    assert_int_equal(nd_xyz_read(&l, &back, &err) == ND_END ? 1 : 0, 1);
    nd_lines_free(&l);
    nd_lines_init(&l, "mem", "frame", buf, len, NULL);
    assert_int_equal(nd_xyz_read(&l, &back, &err), ND_OK);
    nd_lines_free(&l);
    assert_int_equal(back.natoms, n);
    assert_string_equal(back.title, "round trip with a line break");
    for (int i = 0; i < 3 * n; i++)
        assert_memory_equal(&back.xyz[i], &m.xyz[i], sizeof(double)); /* bit for bit */
    for (int i = 0; i < n; i++)
        assert_int_equal(back.z[i], m.z[i]);
    f = open_memstream(&buf2, &len2);
    assert_int_equal(nd_xyz_write(f, &back, NULL), ND_OK);
    fclose(f);
    assert_int_equal(len, len2);
    assert_memory_equal(buf, buf2, len);
    free(buf);
    free(buf2);
    nd_molecule_free(&m);
    nd_molecule_free(&back);
}

/* The number formatter: six decimals when exact, else 15-17 digits. */
static void test_format_double(void **state)
{
    (void)state;
    char b[32];
    assert_string_equal(nd_xyz_format_double(1.4246, b), "1.424600");
    assert_string_equal(nd_xyz_format_double(-2.5, b), "-2.500000");
    assert_string_equal(nd_xyz_format_double(0.1 + 0.2, b), "0.30000000000000004");
    assert_string_equal(nd_xyz_format_double(-0.0, b), "-0");
    assert_string_equal(nd_xyz_format_double(1e-7, b), "1e-07");
    assert_true(strtod(nd_xyz_format_double(1e-7, b), NULL) == 1e-7);
    assert_true(strtod(nd_xyz_format_double(123456789.123456789, b), NULL) == 123456789.123456789);
}

/* Writing refuses what XYZ cannot hold. */
static void test_write_errors(void **state)
{
    (void)state;
    nd_molecule m;
    nd_molecule_init(&m);
    nd_error err;
    char *buf = NULL;
    size_t len = 0;
    FILE *f = open_memstream(&buf, &len);
    assert_int_equal(nd_molecule_add_atom(&m, 6, 0, 0, 0, NULL), ND_OK);
    m.dimension = 0;
    assert_int_equal(nd_xyz_write(f, &m, &err), ND_EINPUT);
    assert_contains(err.msg, "has no coordinates");
    m.dimension = 3;
    m.xyz[1] = NAN;
    assert_int_equal(nd_xyz_write(f, &m, &err), ND_EINPUT);
    assert_contains(err.msg, "non-finite");
    m.xyz[1] = 0.0;
    m.z[0] = 99;
    assert_int_equal(nd_xyz_write(f, &m, &err), ND_EINPUT);
    assert_contains(err.msg, "atomic number 99");
    fclose(f);
    assert_int_equal(len, 0); /* nothing half-written */
    free(buf);
    nd_molecule_free(&m);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_read_single),     cmocka_unit_test(test_read_variants),
        cmocka_unit_test(test_errors),          cmocka_unit_test(test_error_record_number),
        cmocka_unit_test(test_round_trip_exact), cmocka_unit_test(test_format_double),
        cmocka_unit_test(test_write_errors),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
