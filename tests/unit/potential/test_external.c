/* The external-program potential against a fake program
 * (tests/data/label/fake-potential): command splitting, energies and
 * gradients with unit conversion, the nd_energy seam, and every failure. */
#include "tests/lib/testutil.h"
#include "core/numeric.h"

#include "core/units.h"
#include "potential/external.h"

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#define FAKE "tests/data/label/fake-potential"

/* Water-like and unround: four atoms (O, H, H, C). */
static const int Z4[4] = {8, 1, 1, 6};
static const double X4[12] = {0.0213, -0.0087, 0.1173, 0.0411, 0.7572, -0.4692,
                              -0.0335, -0.7618, -0.4587, 1.385, 0.2217, 0.9731};

/* The fake program's energy, written again here from its documentation:
 * Morse over all pairs in atomic units, D = 0.15 hartree, a = 1.1 / bohr,
 * r0 = 2.1 bohr, minus 0.25 hartree per atom. Returns kcal/mol and fills g
 * in kcal/mol/angstrom, converting with CODATA 2018 (bohr = 0.529177210903
 * angstrom; hartree through core/units.h). */
static double morse_kcal(int n, const double *x, double *g)
{
    const double bohr = 0.529177210903, D = 0.15, a = 1.1, r0 = 2.1;
    double e = -0.25 * n;
    for (int i = 0; i < 3 * n; i++)
        g[i] = 0;
    for (int i = 0; i < n; i++)
        for (int j = i + 1; j < n; j++) {
            double d[3], r2 = 0;
            for (int k = 0; k < 3; k++) {
                d[k] = (x[3 * j + k] - x[3 * i + k]) / bohr;
                r2 += d[k] * d[k];
            }
            double r = sqrt(r2), t = exp(-a * (r - r0));
            e += D * (1 - t) * (1 - t);
            double de = 2 * D * (1 - t) * a * t;
            for (int k = 0; k < 3; k++) {
                g[3 * j + k] += de * d[k] / r * ND_HARTREE_KCALMOL / bohr;
                g[3 * i + k] -= de * d[k] / r * ND_HARTREE_KCALMOL / bohr;
            }
        }
    return e * ND_HARTREE_KCALMOL;
}

/* Words by the documented rules; shell syntax is not special. */
static void test_split(void **state)
{
    (void)state;
    char **argv;
    int argc;
    nd_error err;
    assert_int_equal(nd_external_split("  prog 'a b' \"c \\\"d\\\" \\\\\" e\\ f ; rm -rf $HOME x''y '' ", &argv,
                                       &argc, &err),
                     ND_OK);
    const char *want[] = {"prog", "a b", "c \"d\" \\", "e f", ";", "rm", "-rf", "$HOME", "xy", ""};
    assert_int_equal(argc, 10);
    for (int i = 0; i < argc; i++)
        assert_string_equal(argv[i], want[i]);
    assert_null(argv[argc]);
    nd_external_free_argv(argv);
    assert_int_equal(nd_external_split("prog 'open", &argv, &argc, &err), ND_EINPUT);
    assert_contains(err.msg, "unclosed '");
    assert_int_equal(nd_external_split("prog \"open", &argv, &argc, &err), ND_EINPUT);
    assert_contains(err.msg, "unclosed \"");
    assert_int_equal(nd_external_split(" \t ", &argv, &argc, &err), ND_EINPUT);
    assert_contains(err.msg, "empty");
    nd_external_free_argv(NULL);
}

/* Energies and gradients come back converted, whatever units the program
 * declares and in either gradient layout. */
static void test_round_trip_units(void **state)
{
    (void)state;
    const char *cmds[] = {FAKE, FAKE " ev", FAKE " flat"};
    double gref[12], g[12], e;
    double eref = morse_kcal(4, X4, gref);
    for (size_t c = 0; c < 3; c++) {
        nd_external *ext;
        nd_error err;
        assert_int_equal(nd_external_new(&ext, cmds[c], 4, Z4, 0, 1, 30.0, &err), ND_OK);
        assert_int_equal(nd_external_eval(ext, X4, &e, g, &err), ND_OK);
        /* The fake program prints with Python's repr (17 significant digits):
         * agreement to rounding of the unit conversions. */
        assert_rel_close(e, eref, 1e-13, 1.0);
        for (int i = 0; i < 12; i++)
            assert_rel_close(g[i], gref[i], 1e-12, 1e-9);
        double e2;
        assert_int_equal(nd_external_eval(ext, X4, &e2, NULL, &err), ND_OK);
        assert_rel_close(e2, eref, 1e-13, 1.0);
        assert_int_equal(nd_external_calls(ext), 2);
        nd_external_free(ext);
    }
}

/* The returned gradient is the derivative of the returned energy (central
 * differences, h = 1e-4 angstrom, error O(h^2) ~ 1e-6 here). */
static void test_gradient_matches_energy(void **state)
{
    (void)state;
    nd_external *ext;
    nd_error err;
    assert_int_equal(nd_external_new(&ext, FAKE, 4, Z4, 0, 1, 30.0, &err), ND_OK);
    double g[12], e, x[12];
    assert_int_equal(nd_external_eval(ext, X4, &e, g, &err), ND_OK);
    const double h = 1e-4;
    for (int i = 0; i < 12; i += 5) {
        double ep, em;
        memcpy(x, X4, sizeof x);
        x[i] += h;
        assert_int_equal(nd_external_eval(ext, x, &ep, NULL, &err), ND_OK);
        x[i] -= 2 * h;
        assert_int_equal(nd_external_eval(ext, x, &em, NULL, &err), ND_OK);
        assert_close((ep - em) / (2 * h), g[i], 1e-4 * nd_larger(1.0, fabs(g[i])));
    }
    nd_external_free(ext);
}

/* Through nd_energy: a parallel batch gives the same numbers as single calls. */
static void test_energy_seam(void **state)
{
    (void)state;
    nd_external *ext;
    nd_error err;
    assert_int_equal(nd_external_new(&ext, FAKE, 4, Z4, 0, 1, 30.0, &err), ND_OK);
    nd_energy pot = nd_external_energy(ext);
    double x[3 * 12], e[3], g[3 * 12];
    for (int k = 0; k < 3; k++)
        for (int i = 0; i < 12; i++)
            x[12 * k + i] = X4[i] + 0.0137 * k * (i % 3 == 1);
    assert_int_equal(nd_energy_batch(&pot, 4, 3, x, e, g), ND_OK);
    for (int k = 0; k < 3; k++) {
        double gr[12];
        double er = morse_kcal(4, x + 12 * k, gr);
        assert_rel_close(e[k], er, 1e-13, 1.0);
        for (int i = 0; i < 12; i++)
            assert_rel_close(g[12 * k + i], gr[i], 1e-12, 1e-9);
    }
    assert_false(e[0] == e[1]);
    /* Wrong atom count through the seam is refused and explained. */
    assert_int_equal(pot.fn(pot.ctx, 3, x, e, NULL), ND_EINVAL);
    nd_external_last_error(ext, &err);
    assert_contains(err.msg, "called with 3 atoms, set up for 4");
    nd_external_free(ext);
}

/* Every way of failing gives ND_EEXTERNAL and says what happened. */
static void test_failures(void **state)
{
    (void)state;
    static const struct {
        const char *mode, *msg;
        double timeout;
    } cases[] = {
        {"crash", "exited with status 3; its stderr ends: fake-potential: starting | fake-potential: SCF exploded", 30},
        {"segv", "was killed by signal 11", 30},
        {"hang", "gave no answer within 0.4 s and was stopped", 0.4},
        {"garbage", "answered something that is not JSON", 30},
        {"short", "gradient has 3 triples for 4 atoms (expected 4)", 30},
        {"nan", "answered something that is not JSON", 30},
        {"noenergy", "answer has no \"energy\"", 30},
        {"badunit", "unknown energy_unit", 30},
        {"error", "reported an error: no parameters for this element", 30},
    };
    for (size_t c = 0; c < sizeof cases / sizeof cases[0]; c++) {
        char cmd[200];
        snprintf(cmd, sizeof cmd, "%s %s", FAKE, cases[c].mode);
        nd_external *ext;
        nd_error err;
        assert_int_equal(nd_external_new(&ext, cmd, 4, Z4, 0, 1, cases[c].timeout, &err), ND_OK);
        double e, g[12];
        nd_energy pot = nd_external_energy(ext);
        assert_int_equal(pot.fn(pot.ctx, 4, X4, &e, g), ND_EEXTERNAL);
        nd_external_last_error(ext, &err);
        assert_contains(err.msg, "external program 'tests/data/label/fake-potential'");
        assert_contains(err.msg, cases[c].msg);
        nd_external_free(ext);
    }
    nd_external *ext = NULL;
    nd_error err;
    assert_int_equal(nd_external_new(&ext, "no-such-program-here --x", 1, Z4, 0, 1, 5, &err),
                     ND_EEXTERNAL);
    assert_contains(err.msg, "'no-such-program-here': not found in PATH");
    assert_null(ext);
    assert_int_equal(nd_external_new(&ext, "tests/data/label", 1, Z4, 0, 1, 5, &err), ND_EEXTERNAL);
    assert_contains(err.msg, "not an executable file");
    assert_int_equal(nd_external_new(&ext, FAKE, 1, Z4, 0, 1, 0.0, &err), ND_EINVAL);
    assert_int_equal(nd_external_new(&ext, FAKE, 1, Z4, 0, 0, 5.0, &err), ND_EINVAL);
    nd_external_free(NULL);
}

/* Shell syntax in the command reaches the program as plain words: nothing
 * is executed by a shell. */
static void test_no_shell(void **state)
{
    (void)state;
    char marker[256], cmd[1200];
    const char *dir = getenv("TMPDIR");
    snprintf(marker, sizeof marker, "%s/nadir-no-shell-%ld", dir ? dir : "/tmp", (long)getpid());
    unlink(marker);
    snprintf(cmd, sizeof cmd, "%s ok ; touch %s $(touch %s) `touch %s`", FAKE, marker, marker, marker);
    nd_external *ext;
    nd_error err;
    assert_int_equal(nd_external_new(&ext, cmd, 4, Z4, 0, 1, 30.0, &err), ND_OK);
    double e, g[12];
    /* The fake program treats every unknown word as a mode name without
     * effect, so it answers normally. */
    assert_int_equal(nd_external_eval(ext, X4, &e, g, &err), ND_OK);
    assert_int_equal(access(marker, F_OK), -1);
    nd_external_free(ext);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_split),
        cmocka_unit_test(test_round_trip_units),
        cmocka_unit_test(test_gradient_matches_energy),
        cmocka_unit_test(test_energy_seam),
        cmocka_unit_test(test_failures),
        cmocka_unit_test(test_no_shell),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
