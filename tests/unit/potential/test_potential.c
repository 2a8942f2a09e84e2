/* Energy and gradient of a model: gradient against central finite
 * differences on random molecules with random weights, invariances,
 * smoothness across the cutoffs, batch = single, bit-identical results at 1
 * and 2 threads, per-member results, the nd_energy adapter and its errors. */
#include "tests/lib/testutil.h"
#include "core/numeric.h"

#include "core/rng.h"
#include "potential/network.h"
#include "potential/potential.h"

#include <cblas.h>
#include <math.h>
#include <omp.h>
#include <stdlib.h>
#include <string.h>

static const int ZS[4] = {1, 6, 7, 8};

/* A small random model over H, C, N, O with random input scaling and
 * offsets (so every parameter kind is exercised). Free with nd_model_free. */
static nd_model *make_model(int members, uint64_t seed)
{
    nd_model_spec s;
    nd_model_spec_defaults(&s);
    s.nelements = 4;
    memcpy(s.z, ZS, sizeof ZS);
    s.nhidden = 2;
    s.hidden[0] = 24;
    s.hidden[1] = 16;
    s.members = members;
    nd_model *m;
    assert_int_equal(nd_model_new(&m, &s, seed, NULL), ND_OK);
    nd_rng r;
    nd_rng_seed(&r, seed + 99);
    for (int f = 0; f < m->nel * m->D; f++) {
        m->mu[f] = 0.2 * nd_rng_uniform(&r);
        m->scale[f] = 0.5 + nd_rng_uniform(&r);
    }
    for (int e = 0; e < m->nel; e++)
        m->offset[e] = -10 * nd_rng_normal(&r);
    /* larger output weights than a fresh model, so forces are O(1) */
    for (int e = 0; e < m->nel; e++)
        for (int k = 0; k < members; k++)
            for (int h = 0; h < m->width[m->nhidden]; h++)
                nd_net_weights(m, e, m->nhidden + 1, k)[h] *= 10;
    return m;
}

/* A random "molecule": n atoms, minimum separation 0.95 A, density like an
 * organic molecule, elements drawn from ZS. */
static void random_molecule(nd_rng *r, int n, double *x, int *z)
{
    double L = cbrt(n / 0.1) + 1.0;
    for (int i = 0; i < n; i++) {
        for (;;) {
            for (int k = 0; k < 3; k++)
                x[3 * i + k] = L * nd_rng_uniform(r);
            int ok = 1;
            for (int j = 0; j < i && ok; j++) {
                double d2 = 0;
                for (int k = 0; k < 3; k++)
                    d2 += pow(x[3 * i + k] - x[3 * j + k], 2);
                ok = d2 > 0.95 * 0.95;
            }
            if (ok)
                break;
        }
        z[i] = ZS[nd_rng_below(r, 4)];
    }
}

/* Energy of one structure through p. */
static double energy_at(nd_potential *p, const double *x)
{
    double e;
    assert_int_equal(nd_potential_compute(p, 1, x, &e, NULL, NULL, NULL, NULL), ND_OK);
    return e;
}

/* Worst relative error of the analytic gradient against central finite
 * differences of the energy: the fourth-order central stencil
 * (8 (E(h) - E(-h)) - (E(2h) - E(-2h))) / 12h with h = 1e-4 angstrom
 * (truncation O(h^4) ~ 1e-16 times the fifth derivative, rounding about
 * 1e-16 |E| / h), relative to max(|fd|, 1e-3 max|g|). */
static double fd_worst(nd_potential *p, int n, double *x, const double *g)
{
    double gmax = 0, worst = 0;
    for (int i = 0; i < 3 * n; i++)
        gmax = nd_larger(gmax, fabs(g[i]));
    for (int i = 0; i < 3 * n; i++) {
        const double h = 1e-4, x0 = x[i];
        double e[4];
        const double off[4] = {h, -h, 2 * h, -2 * h};
        for (int k = 0; k < 4; k++) {
            x[i] = x0 + off[k];
            e[k] = energy_at(p, x);
        }
        x[i] = x0;
        double fd = (8 * (e[0] - e[1]) - (e[2] - e[3])) / (12 * h);
        worst = nd_larger(worst, fabs(fd - g[i]) / nd_larger(fabs(fd), 1e-3 * gmax));
    }
    return worst;
}

static void test_gradient_fd(void **state)
{
    (void)state;
    nd_model *m = make_model(3, 41);
    nd_rng r;
    nd_rng_seed(&r, 5);
    int sizes[3] = {2, 9, 24};
    for (int t = 0; t < 3; t++) {
        int n = sizes[t];
        double x[3 * 24], g[3 * 24];
        int z[24];
        random_molecule(&r, n, x, z);
        for (int mode = ND_POTENTIAL_MEAN; mode < 3; mode += 2) { /* mean, member 1 */
            nd_potential *p;
            nd_error err;
            assert_int_equal(nd_potential_new(&p, m, n, z, mode, &err), ND_OK);
            double e;
            assert_int_equal(nd_potential_compute(p, 1, x, &e, g, NULL, NULL, &err), ND_OK);
            double w = fd_worst(p, n, x, g);
            print_message("# n = %d, mode %d: worst relative gradient error %.3g\n", n, mode, w);
            assert_true(w <= 1e-6);
            nd_potential_free(p);
        }
    }
    nd_model_free(m);
}

/* Rotation, translation and permutation of same-element atoms leave the
 * energy unchanged (relative 1e-10) and carry the gradient along. */
static void test_invariance(void **state)
{
    (void)state;
    nd_model *m = make_model(2, 43);
    nd_rng r;
    nd_rng_seed(&r, 17);
    enum { n = 30 };
    double x[3 * n], y[3 * n], g[3 * n], gy[3 * n];
    int z[n], zp[n];
    random_molecule(&r, n, x, z);
    nd_potential *p;
    assert_int_equal(nd_potential_new(&p, m, n, z, ND_POTENTIAL_MEAN, NULL), ND_OK);
    double e0, e1;
    assert_int_equal(nd_potential_compute(p, 1, x, &e0, g, NULL, NULL, NULL), ND_OK);
    double gmax = 0;
    for (int i = 0; i < 3 * n; i++)
        gmax = nd_larger(gmax, fabs(g[i]));
    /* rotation from a random unit quaternion, plus a translation */
    double q[4], qn = 0;
    for (int k = 0; k < 4; k++) {
        q[k] = nd_rng_normal(&r);
        qn += q[k] * q[k];
    }
    qn = sqrt(qn);
    double a = q[0] / qn, b = q[1] / qn, c = q[2] / qn, d = q[3] / qn;
    double R[9] = {a * a + b * b - c * c - d * d, 2 * (b * c - a * d), 2 * (b * d + a * c),
                   2 * (b * c + a * d), a * a - b * b + c * c - d * d, 2 * (c * d - a * b),
                   2 * (b * d - a * c), 2 * (c * d + a * b), a * a - b * b - c * c + d * d};
    double tr[3] = {12.385, -7.25, 3.0625};
    for (int i = 0; i < n; i++)
        for (int k = 0; k < 3; k++)
            y[3 * i + k] = R[3 * k] * x[3 * i] + R[3 * k + 1] * x[3 * i + 1] +
                           R[3 * k + 2] * x[3 * i + 2] + tr[k];
    assert_int_equal(nd_potential_compute(p, 1, y, &e1, gy, NULL, NULL, NULL), ND_OK);
    assert_rel_close(e1, e0, 1e-10, 1e-300);
    for (int i = 0; i < n; i++)
        for (int k = 0; k < 3; k++) {
            double want = R[3 * k] * g[3 * i] + R[3 * k + 1] * g[3 * i + 1] + R[3 * k + 2] * g[3 * i + 2];
            assert_close(gy[3 * i + k], want, 1e-10 * gmax);
        }
    nd_potential_free(p);
    /* permutation: reverse the atom order, then swap two atoms of one element */
    int perm[n];
    for (int i = 0; i < n; i++)
        perm[i] = n - 1 - i;
    for (int i = 0; i < n; i++)
        for (int j = i + 1; j < n; j++)
            if (z[perm[i]] == z[perm[j]]) {
                int t = perm[i];
                perm[i] = perm[j];
                perm[j] = t;
                i = n;
                break;
            }
    for (int i = 0; i < n; i++) {
        zp[i] = z[perm[i]];
        memcpy(y + 3 * i, x + 3 * perm[i], 3 * sizeof(double));
    }
    assert_int_equal(nd_potential_new(&p, m, n, zp, ND_POTENTIAL_MEAN, NULL), ND_OK);
    assert_int_equal(nd_potential_compute(p, 1, y, &e1, gy, NULL, NULL, NULL), ND_OK);
    assert_rel_close(e1, e0, 1e-10, 1e-300);
    for (int i = 0; i < n; i++)
        for (int k = 0; k < 3; k++)
            assert_close(gy[3 * i + k], g[3 * perm[i] + k], 1e-10 * gmax);
    nd_potential_free(p);
    nd_model_free(m);
}

/* A neighbour crossing each cutoff: energy and force change smoothly.
 * Atom 2 moves along x from atom 0 through the angular cutoff and then the
 * radial one, in steps h = 1e-3 angstrom. For a function with continuous
 * first and second derivatives:
 *  - the trapezoid rule E(s+1) - E(s) = h (E'(s) + E'(s+1)) / 2 holds to
 *    O(h^3): a jump in the energy or the force breaks it;
 *  - the second difference of the force is O(h^2): a jump in the force or
 *    its slope (the Hessian) breaks it.
 * Beyond the radial cutoff the energy is exactly that of the pair plus the
 * isolated atom. */
static void test_cutoff_continuity(void **state)
{
    (void)state;
    nd_model *m = make_model(1, 47);
    const nd_descriptor_params *dp = nd_model_descriptor(m);
    int z[3] = {6, 8, 1};
    nd_potential *p;
    assert_int_equal(nd_potential_new(&p, m, 3, z, ND_POTENTIAL_MEAN, NULL), ND_OK);
    double cut[2] = {dp->angular_cutoff, dp->radial_cutoff};
    const double h = 1e-3;
    double worst_trap = 0, worst_d2 = 0, fscale = 0;
    for (int c = 0; c < 2; c++) {
        double e[41], f[41];
        for (int s = 0; s <= 40; s++) {
            double x[9] = {0, 0, 0, -1.21, 0.3, 0, cut[c] - 0.02 + h * s, 0, 0}, g[9];
            assert_int_equal(nd_potential_compute(p, 1, x, &e[s], g, NULL, NULL, NULL), ND_OK);
            f[s] = g[6];
            fscale = nd_larger(fscale, fabs(g[6]));
        }
        for (int s = 1; s <= 40; s++)
            worst_trap = nd_larger(worst_trap, fabs(e[s] - e[s - 1] - h * (f[s] + f[s - 1]) / 2));
        for (int s = 2; s <= 40; s++)
            worst_d2 = nd_larger(worst_d2, fabs(f[s] - 2 * f[s - 1] + f[s - 2]));
    }
    print_message("# cutoff scan: force scale %.3g, trapezoid %.3g, second difference %.3g\n",
                  fscale, worst_trap, worst_d2);
    assert_true(fscale > 1e-3); /* the crossing atom does feel the others */
    assert_true(worst_trap < 1e-9);
    assert_true(worst_d2 < 1e-5);
    /* beyond every cutoff: E = E(pair) + E(lone H) */
    double x3[9] = {0, 0, 0, 1.21, 0.3, 0, 40, 0, 0}, e3, e2, e1;
    assert_int_equal(nd_potential_compute(p, 1, x3, &e3, NULL, NULL, NULL, NULL), ND_OK);
    nd_potential *p2, *p1;
    assert_int_equal(nd_potential_new(&p2, m, 2, z, ND_POTENTIAL_MEAN, NULL), ND_OK);
    assert_int_equal(nd_potential_new(&p1, m, 1, z + 2, ND_POTENTIAL_MEAN, NULL), ND_OK);
    assert_int_equal(nd_potential_compute(p2, 1, x3, &e2, NULL, NULL, NULL, NULL), ND_OK);
    assert_int_equal(nd_potential_compute(p1, 1, x3 + 6, &e1, NULL, NULL, NULL, NULL), ND_OK);
    assert_close(e3, e2 + e1, 1e-12 * fabs(e3));
    nd_potential_free(p);
    nd_potential_free(p1);
    nd_potential_free(p2);
    nd_model_free(m);
}

/* Batch of m structures equals m single calls (to rounding: OpenBLAS picks
 * its kernel by matrix size, so a tall batch matrix may round differently
 * in the last bit); 1 and 2 threads give identical bits, whatever the
 * OpenBLAS thread count; concurrent callers of one potential get the bits of
 * a lone caller. */
static void test_batch_and_threads(void **state)
{
    (void)state;
    nd_model *m = make_model(3, 53);
    nd_rng r;
    nd_rng_seed(&r, 23);
    enum { n = 40, ms = 8 }; /* 320 atoms: above the one-thread threshold of potential.c */
    double x[ms * 3 * n];
    int z[n];
    random_molecule(&r, n, x, z);
    for (int s = 1; s < ms; s++)
        for (int i = 0; i < 3 * n; i++)
            x[s * 3 * n + i] = x[i] + 0.15 * nd_rng_normal(&r);
    nd_potential *p;
    assert_int_equal(nd_potential_new(&p, m, n, z, ND_POTENTIAL_MEAN, NULL), ND_OK);
    double eb[ms], gb[ms * 3 * n], es, gs[3 * n], mb[ms * 3];
    double e2[ms], g2[ms * 3 * n];
    omp_set_num_threads(1);
    openblas_set_num_threads(1);
    assert_int_equal(nd_potential_compute(p, ms, x, eb, gb, mb, NULL, NULL), ND_OK);
    double de = 0, dg = 0, e1[ms], g1[ms * 3 * n];
    for (int s = 0; s < ms; s++) {
        assert_int_equal(nd_potential_compute(p, 1, x + s * 3 * n, &es, gs, NULL, NULL, NULL), ND_OK);
        e1[s] = es;
        memcpy(g1 + s * 3 * n, gs, sizeof gs);
        de = nd_larger(de, fabs(es - eb[s]) / fabs(es));
        for (int i = 0; i < 3 * n; i++)
            dg = nd_larger(dg, fabs(gs[i] - gb[s * 3 * n + i]) / (1 + fabs(gs[i])));
    }
    print_message("# batch vs single: energy %.3g, gradient %.3g (relative)\n", de, dg);
    assert_true(de <= 1e-13 && dg <= 1e-13);
    omp_set_num_threads(2);
    openblas_set_num_threads(1);
    assert_int_equal(nd_potential_compute(p, ms, x, e2, g2, NULL, NULL, NULL), ND_OK);
    assert_true(memcmp(e2, eb, sizeof e2) == 0);
    assert_true(memcmp(g2, gb, sizeof g2) == 0);
    /* a caller that set OpenBLAS to 2 threads gets the same bits */
    omp_set_num_threads(1);
    openblas_set_num_threads(2);
    assert_int_equal(nd_potential_compute(p, ms, x, e2, g2, NULL, NULL, NULL), ND_OK);
    assert_true(memcmp(e2, eb, sizeof e2) == 0);
    assert_true(memcmp(g2, gb, sizeof g2) == 0);
    omp_set_num_threads(2);
    openblas_set_num_threads(2);
    assert_int_equal(nd_potential_compute(p, ms, x, e2, g2, NULL, NULL, NULL), ND_OK);
    assert_true(memcmp(e2, eb, sizeof e2) == 0);
    assert_true(memcmp(g2, gb, sizeof g2) == 0);
    /* the adapter, batch and single, in parallel callers */
    nd_energy pot = nd_potential_energy(p);
    double e3[ms], g3[ms * 3 * n];
    assert_int_equal(nd_energy_batch(&pot, n, ms, x, e3, g3), ND_OK);
    assert_true(memcmp(e3, eb, sizeof e3) == 0);
    int bad = 0;
#pragma omp parallel for num_threads(2) reduction(+ : bad)
    for (int s = 0; s < ms; s++) {
        double e, g[3 * n];
        if (pot.fn(pot.ctx, n, x + s * 3 * n, &e, g) != ND_OK || e != e1[s] ||
            memcmp(g, g1 + s * 3 * n, sizeof g) != 0)
            bad++;
    }
    assert_int_equal(bad, 0);
    assert_int_equal(pot.fn(pot.ctx, n - 1, x, &es, NULL), ND_EINVAL);
    nd_potential_free(p);
    /* one large structure (atom-parallel stages): 1 and 2 threads agree */
    enum { nl = 400 };
    double *xl = malloc(sizeof(double) * 3 * nl), *ga = malloc(sizeof(double) * 3 * nl),
           *gc = malloc(sizeof(double) * 3 * nl), ea, ec;
    int *zl = malloc(sizeof(int) * nl);
    random_molecule(&r, nl, xl, zl);
    assert_int_equal(nd_potential_new(&p, m, nl, zl, ND_POTENTIAL_MEAN, NULL), ND_OK);
    omp_set_num_threads(1);
    assert_int_equal(nd_potential_compute(p, 1, xl, &ea, ga, NULL, NULL, NULL), ND_OK);
    omp_set_num_threads(2);
    assert_int_equal(nd_potential_compute(p, 1, xl, &ec, gc, NULL, NULL, NULL), ND_OK);
    assert_true(memcmp(&ea, &ec, sizeof ea) == 0);
    assert_true(memcmp(ga, gc, sizeof(double) * 3 * nl) == 0);
    nd_potential_free(p);
    free(xl);
    free(ga);
    free(gc);
    free(zl);
    nd_model_free(m);
}

/* Per-member energies and gradients: the mean mode is their average, the
 * single-member mode is that member, each member gradient matches finite
 * differences of that member's energy. */
static void test_members(void **state)
{
    (void)state;
    enum { K = 3, n = 11 };
    nd_model *m = make_model(K, 59);
    nd_rng r;
    nd_rng_seed(&r, 29);
    double x[3 * n], g[3 * n], me[K], mg[K * 3 * n], e;
    int z[n];
    random_molecule(&r, n, x, z);
    nd_potential *p;
    assert_int_equal(nd_potential_new(&p, m, n, z, ND_POTENTIAL_MEAN, NULL), ND_OK);
    assert_int_equal(nd_potential_compute(p, 1, x, &e, g, me, mg, NULL), ND_OK);
    assert_close(e, (me[0] + me[1] + me[2]) / 3, 1e-12 * fabs(e));
    for (int i = 0; i < 3 * n; i++)
        assert_close(g[i], (mg[i] + mg[3 * n + i] + mg[6 * n + i]) / 3, 1e-11);
    assert_true(fabs(me[0] - me[1]) > 1e-6); /* members differ */
    nd_potential_free(p);
    for (int k = 0; k < K; k++) {
        double ek, gk[3 * n];
        assert_int_equal(nd_potential_new(&p, m, n, z, k, NULL), ND_OK);
        assert_int_equal(nd_potential_compute(p, 1, x, &ek, gk, NULL, NULL, NULL), ND_OK);
        assert_close(ek, me[k], 1e-12 * fabs(ek));
        for (int i = 0; i < 3 * n; i++)
            assert_close(gk[i], mg[k * 3 * n + i], 1e-12);
        assert_true(fd_worst(p, n, x, mg + k * 3 * n) <= 1e-6);
        nd_potential_free(p);
    }
    nd_model_free(m);
}

static void test_errors(void **state)
{
    (void)state;
    nd_model *m = make_model(2, 61);
    nd_potential *p;
    nd_error err;
    int z[3] = {6, 35, 1};
    assert_int_equal(nd_potential_new(&p, m, 3, z, ND_POTENTIAL_MEAN, &err), ND_EDOMAIN);
    assert_contains(err.msg, "atom 2 (Br)");
    assert_contains(err.msg, "H, C, N, O");
    assert_int_equal(nd_potential_new(&p, m, 3, z, 2, &err), ND_EINVAL);
    z[1] = 8;
    assert_int_equal(nd_potential_new(&p, m, 3, z, 1, &err), ND_OK);
    double x[9] = {0, 0, 0, 1.2, 0, 0, 1.2, 0, 0}, e, g[9];
    assert_int_equal(nd_potential_compute(p, 1, x, &e, g, NULL, NULL, &err), ND_ECOMPUTE);
    x[8] = INFINITY;
    assert_int_equal(nd_potential_compute(p, 1, x, &e, g, NULL, NULL, &err), ND_ECOMPUTE);
    nd_potential_free(p);
    /* one atom: energy is its network plus offset, zero gradient */
    assert_int_equal(nd_potential_new(&p, m, 1, z, ND_POTENTIAL_MEAN, &err), ND_OK);
    assert_int_equal(nd_potential_compute(p, 1, x, &e, g, NULL, NULL, &err), ND_OK);
    assert_true(g[0] == 0 && g[1] == 0 && g[2] == 0 && isfinite(e));
    nd_potential_free(p);
    nd_potential_free(NULL);
    nd_model_free(m);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_gradient_fd),   cmocka_unit_test(test_invariance),
        cmocka_unit_test(test_cutoff_continuity), cmocka_unit_test(test_batch_and_threads),
        cmocka_unit_test(test_members),       cmocka_unit_test(test_errors),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
