/* Evaluation figures on a hand-computable case (a model whose networks are
 * zero except the output biases, so every prediction is known in closed
 * form), and the Spearman rank correlation against scipy.stats.spearmanr
 * (SciPy, Debian python3-scipy) on data with ties. */
#include "tests/lib/testutil.h"

#include "core/rng.h"
#include "potential/dataset.h"
#include "potential/evaluate.h"
#include "potential/model.h"
#include "potential/network.h"

#include <math.h>
#include <omp.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

/* H and O, 2 members; all weights zero, output bias 0.1 (member 0) and 0.3
 * (member 1) per atom; offsets H -1, O -10. So a water (O, H, H) is
 * predicted at -12 + 3 * 0.2 = -11.4 (members -11.7, -11.1; spread
 * 0.6 / sqrt 2) and H2 at -2 + 0.4 = -1.6 (members -1.8, -1.4; spread
 * 0.4 / sqrt 2), with zero forces. */
static nd_model *constant_model(void)
{
    nd_model_spec s;
    nd_model_spec_defaults(&s);
    s.nelements = 2;
    s.z[0] = 1;
    s.z[1] = 8;
    s.nhidden = 1;
    s.hidden[0] = 4;
    s.members = 2;
    nd_model *m;
    assert_int_equal(nd_model_new(&m, &s, 3, NULL), ND_OK);
    for (int e = 0; e < 2; e++) {
        memset(m->net + (size_t)e * m->elem_stride, 0, m->elem_stride * sizeof(double));
        nd_net_bias(m, e, 2, 0)[0] = 0.1;
        nd_net_bias(m, e, 2, 1)[0] = 0.3;
    }
    m->offset[0] = -1;
    m->offset[1] = -10;
    return m;
}

static void test_hand_case(void **state)
{
    (void)state;
    const char *text =
        "{\"dataset\": \"nadir\", \"version\": 1}\n"
        "{\"key\": \"a\", \"elements\": [\"O\", \"H\", \"H\"], \"coordinates\": [0, 0, 0.117, 0, "
        "0.757, -0.469, 0, -0.757, -0.469], \"energy\": -11.0, \"forces\": [0.3, 0, 0, 0, -0.6, 0, "
        "0, 0, 0.9]}\n"
        "{\"key\": \"a\", \"elements\": [\"O\", \"H\", \"H\"], \"coordinates\": [0, 0, 0.12, 0, "
        "0.76, -0.47, 0, -0.75, -0.46], \"energy\": -11.9}\n"
        "{\"key\": \"a\", \"elements\": [\"O\", \"H\", \"H\"], \"coordinates\": [0, 0, 0.11, 0, "
        "0.75, -0.48, 0, -0.77, -0.47], \"energy\": -11.2}\n"
        "{\"key\": \"b\", \"elements\": [\"H\", \"H\"], \"coordinates\": [0, 0, 0, 0, 0, 0.74], "
        "\"energy\": -1.5}\n";
    const char *path = nd_test_write_temp(text, ".jsonl");
    nd_dataset *d;
    nd_error err;
    assert_int_equal(nd_dataset_load(&d, path, 0, NULL, &err), ND_OK);
    nd_model *m = constant_model();
    nd_evaluation ev;
    assert_int_equal(nd_evaluate_dataset(m, d, &ev, &err), ND_OK);
    assert_int_equal(ev.structures, 4);
    assert_int_equal(ev.atoms, 11);
    assert_int_equal(ev.molecules, 2);
    /* errors -0.4, +0.5, -0.2, -0.1 */
    assert_close(ev.energy_mae, 0.3, 1e-12);
    assert_close(ev.energy_rmse, sqrt(0.115), 1e-12);
    assert_close(ev.energy_atom_mae, (1.1 / 3 + 0.05) / 4, 1e-12);
    assert_close(ev.energy_atom_rmse, sqrt((0.16 / 9 + 0.25 / 9 + 0.04 / 9 + 0.01 / 4) / 4), 1e-12);
    /* molecule a from its lowest reference (-11.9): reference 0.9 and 0.7,
     * predicted 0 and 0; molecule b has one structure */
    assert_int_equal(ev.relative_count, 2);
    assert_close(ev.relative_mae, 0.8, 1e-12);
    /* constant predictions have no ranking: no molecule counts */
    assert_int_equal(ev.rank_molecules, 0);
    assert_true(isnan(ev.rank_median));
    /* forces: predicted 0, reference (0.3,0,0), (0,-0.6,0), (0,0,0.9) */
    assert_int_equal(ev.force_components, 9);
    assert_close(ev.force_mae, 0.2, 1e-12);
    assert_close(ev.force_rmse, sqrt(0.14), 1e-12);
    assert_int_equal(ev.nelements, 2);
    assert_int_equal(ev.z[0], 1);
    assert_int_equal(ev.z[1], 8);
    assert_int_equal(ev.element_components[0], 6);
    assert_close(ev.element_force_mae[0], 0.25, 1e-12);
    assert_close(ev.element_force_rmse[0], sqrt(0.195), 1e-12);
    assert_close(ev.element_force_mae[1], 0.1, 1e-12);
    assert_close(ev.element_force_rmse[1], sqrt(0.03), 1e-12);
    /* spread: 0.6/sqrt2 = 0.424 for the waters, 0.4/sqrt2 = 0.283 for H2;
     * |errors| 0.4, 0.5, 0.2, 0.1: three within one spread, all within two;
     * ranks (3,3,3,1) against (3,4,2,1) give 3/sqrt(15) */
    assert_int_equal(ev.members, 2);
    assert_close(ev.energy_spread_mean, (3 * 0.6 + 0.4) / sqrt(2.0) / 4, 1e-12);
    assert_close(ev.energy_within1, 0.75, 0);
    assert_close(ev.energy_within2, 1.0, 0);
    assert_close(ev.energy_spread_rank, 3 / sqrt(15.0), 1e-12);
    assert_close(ev.force_spread_mean, 0, 1e-12);
    assert_close(ev.force_within1, 0, 0);
    /* the same figures, bit for bit, at another thread count */
    nd_evaluation ev2;
    int nt = omp_get_max_threads();
    omp_set_num_threads(nt > 1 ? 1 : 2);
    assert_int_equal(nd_evaluate_dataset(m, d, &ev2, &err), ND_OK);
    omp_set_num_threads(nt);
    assert_memory_equal(&ev, &ev2, sizeof ev);
    nd_model_free(m);
    nd_dataset_free(d);
}

/* An element outside the model is an error naming the structure. */
static void test_domain(void **state)
{
    (void)state;
    const char *text = "{\"key\": \"c\", \"elements\": [\"C\", \"O\"], \"coordinates\": [0, 0, 0, "
                       "0, 0, 1.13], \"energy\": -5}\n";
    nd_dataset *d;
    nd_error err;
    assert_int_equal(nd_dataset_load(&d, nd_test_write_temp(text, ".jsonl"), 0, NULL, &err), ND_OK);
    nd_model *m = constant_model();
    nd_evaluation ev;
    assert_int_equal(nd_evaluate_dataset(m, d, &ev, &err), ND_EDOMAIN);
    assert_contains(err.msg, "structure 1");
    nd_model_free(m);
    nd_dataset_free(d);
}

/* Spearman: hand cases, then against scipy.stats.spearmanr. */
static void test_spearman(void **state)
{
    (void)state;
    double a[5] = {1, 2, 3, 4, 5}, b[5] = {5, 6, 7, 8, 7}, c[5] = {2, 2, 2, 2, 2};
    assert_close(nd_evaluate_spearman(5, a, a), 1, 1e-15);
    double ra[5] = {5, 4, 3, 2, 1};
    assert_close(nd_evaluate_spearman(5, a, ra), -1, 1e-15);
    /* ranks of b: 1, 2, 3.5, 5, 3.5 (mean 3, deviations -2, -1, 0.5, 2,
     * 0.5; those of a: -2, -1, 0, 1, 2): rho = 8 / sqrt(10 * 9.5) */
    assert_close(nd_evaluate_spearman(5, a, b), 8 / sqrt(95.0), 1e-14);
    assert_true(isnan(nd_evaluate_spearman(5, a, c)));
    assert_true(isnan(nd_evaluate_spearman(1, a, b)));
    /* random data with ties, against scipy */
    FILE *probe = popen("/usr/bin/python3 -c 'import scipy.stats' 2>/dev/null && echo yes", "r");
    char line[64] = "";
    if (!probe || !fgets(line, sizeof line, probe) || strncmp(line, "yes", 3) != 0) {
        if (probe)
            pclose(probe);
        skip();
    }
    pclose(probe);
    nd_rng r;
    nd_rng_seed(&r, 2385);
    enum { N = 40, TRIALS = 4 };
    static double x[TRIALS][N], y[TRIALS][N];
    static char cmd[32768];
    int L = snprintf(cmd, sizeof cmd,
                     "/usr/bin/python3 -c 'import scipy.stats as s\n"
                     "for x, y in [");
    for (int trial = 0; trial < TRIALS; trial++) {
        L += snprintf(cmd + L, sizeof cmd - (size_t)L, "%s([", trial ? "," : "");
        for (int i = 0; i < N; i++) {
            x[trial][i] = (double)nd_rng_below(&r, 12);         /* many ties */
            y[trial][i] = x[trial][i] * (trial - 1.5) + 4 * nd_rng_normal(&r);
            if (trial == 3)
                y[trial][i] = floor(y[trial][i]);              /* ties on both sides */
            L += snprintf(cmd + L, sizeof cmd - (size_t)L, "%s%.17g", i ? "," : "", x[trial][i]);
        }
        L += snprintf(cmd + L, sizeof cmd - (size_t)L, "],[");
        for (int i = 0; i < N; i++)
            L += snprintf(cmd + L, sizeof cmd - (size_t)L, "%s%.17g", i ? "," : "", y[trial][i]);
        L += snprintf(cmd + L, sizeof cmd - (size_t)L, "])");
    }
    snprintf(cmd + L, sizeof cmd - (size_t)L, "]:\n    print(repr(float(s.spearmanr(x, y)[0])))'");
    FILE *p = popen(cmd, "r");
    assert_non_null(p);
    for (int trial = 0; trial < TRIALS; trial++) {
        assert_non_null(fgets(line, sizeof line, p));
        double ref = strtod(line, NULL);
        assert_close(nd_evaluate_spearman(N, x[trial], y[trial]), ref, 1e-12);
    }
    pclose(p);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_hand_case),
        cmocka_unit_test(test_domain),
        cmocka_unit_test(test_spearman),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
