/* Symmetry functions: the cutoff and its derivatives, feature values against
 * the formulas evaluated independently, and the contracted derivatives
 * against central finite differences. */
#include "tests/lib/testutil.h"
#include "core/numeric.h"

#include "core/rng.h"
#include "potential/descriptor.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

/* Cutoff: f(0) = 1, f(rc) = 0; f' and f'' against central differences of f
 * and f' (step 1e-5: truncation O(h^2) ~ 1e-10, well under the tolerance). */
static void test_cutoff_derivatives(void **state)
{
    (void)state;
    const double rc = 4.385, h = 1e-5;
    double d1, d2;
    assert_close(nd_descriptor_cutoff(0, rc, &d1, &d2), 1.0, 1e-15);
    assert_close(d1, 0, 1e-15);
    assert_close(d2, 0, 1e-15);
    assert_true(nd_descriptor_cutoff(rc, rc, &d1, &d2) == 0 && d1 == 0 && d2 == 0);
    assert_true(nd_descriptor_cutoff(rc + 1, rc, &d1, &d2) == 0 && d1 == 0 && d2 == 0);
    /* value, slope and curvature all tend to zero at rc from inside */
    double f = nd_descriptor_cutoff(rc - 1e-4, rc, &d1, &d2);
    assert_true(fabs(f) < 1e-10 && fabs(d1) < 1e-6 && fabs(d2) < 1e-3);
    for (double r = 0.137; r < rc; r += 0.2113) {
        nd_descriptor_cutoff(r, rc, &d1, &d2);
        double fp, fm, dp, dm;
        fp = nd_descriptor_cutoff(r + h, rc, &dp, NULL);
        fm = nd_descriptor_cutoff(r - h, rc, &dm, NULL);
        assert_close(d1, (fp - fm) / (2 * h), 1e-8);
        assert_close(d2, (dp - dm) / (2 * h), 1e-7);
        /* the polynomial form of descriptor.h, evaluated another way */
        double t = r / rc;
        assert_close(nd_descriptor_cutoff(r, rc, NULL, NULL),
                     1 - 10 * pow(t, 3) + 15 * pow(t, 4) - 6 * pow(t, 5), 1e-14);
    }
}

static void test_defaults_and_check(void **state)
{
    (void)state;
    nd_descriptor_params p;
    nd_error err;
    nd_descriptor_defaults(&p);
    assert_int_equal(nd_descriptor_check(&p, &err), ND_OK);
    assert_int_equal(nd_descriptor_size(&p, 7), 210);
    assert_int_equal(nd_descriptor_size(&p, 4), 40 + 50);
    nd_descriptor_params q = p;
    q.angular_cutoff = 6.0;
    assert_int_equal(nd_descriptor_check(&q, &err), ND_EINPUT);
    assert_contains(err.msg, "angular cutoff");
    q = p;
    q.angular_zeta[2] = 0;
    assert_int_equal(nd_descriptor_check(&q, &err), ND_EINPUT);
    assert_contains(err.msg, "zeta");
    q = p;
    q.angular_lambda[1] = 2;
    assert_int_equal(nd_descriptor_check(&q, &err), ND_EINPUT);
    assert_contains(err.msg, "lambda");
    q = p;
    q.radial_eta[0] = -1;
    assert_int_equal(nd_descriptor_check(&q, &err), ND_EINPUT);
    assert_contains(err.msg, "radial function 1");
    q = p;
    q.nradial = 0;
    assert_int_equal(nd_descriptor_check(&q, &err), ND_EINPUT);
    q = p;
    q.radial_cutoff = NAN;
    assert_int_equal(nd_descriptor_check(&q, &err), ND_EINPUT);
}

/* Three atoms (slots 0, 1, 1): the features of atom 0 equal the formulas of
 * descriptor.h written out directly, with the angle from the law of cosines. */
static void test_values_by_formula(void **state)
{
    (void)state;
    nd_descriptor_params p;
    nd_descriptor_defaults(&p);
    const int nel = 2;
    double x[9] = {0.1, -0.2, 0.05, 1.385, 0.31, -0.12, -0.42, 1.17, 0.66};
    int species[3] = {0, 1, 1}, nbr[2] = {1, 2};
    int D = nd_descriptor_size(&p, nel);
    double *G = calloc((size_t)D, sizeof *G);
    double *scr = malloc(sizeof(double) * nd_descriptor_scratch_doubles(&p, nel, 2));
    int iscr[8];
    nd_descriptor_atom(&p, nel, x, species, 0, nbr, 2, G, scr, iscr);
    double r1 = sqrt(pow(x[3] - x[0], 2) + pow(x[4] - x[1], 2) + pow(x[5] - x[2], 2));
    double r2 = sqrt(pow(x[6] - x[0], 2) + pow(x[7] - x[1], 2) + pow(x[8] - x[2], 2));
    double r12 = sqrt(pow(x[6] - x[3], 2) + pow(x[7] - x[4], 2) + pow(x[8] - x[5], 2));
    double cth = (r1 * r1 + r2 * r2 - r12 * r12) / (2 * r1 * r2);
    for (int m = 0; m < p.nradial; m++) {
        assert_true(G[m] == 0); /* no neighbour of element slot 0 */
        double want = 0;
        double rr[2] = {r1, r2};
        for (int j = 0; j < 2; j++) {
            double t = rr[j] / p.radial_cutoff;
            want += exp(-p.radial_eta[m] * pow(rr[j] - p.radial_shift[m], 2)) *
                    pow(1 - t, 3) * (1 + 3 * t + 6 * t * t);
        }
        assert_rel_close(G[p.nradial + m], want, 1e-13, 1e-300);
    }
    /* pairs: (0,0) = 0, (0,1) = 1, (1,1) = 2 */
    for (int n = 0; n < p.nangular; n++) {
        assert_true(G[2 * p.nradial + 0 * p.nangular + n] == 0);
        assert_true(G[2 * p.nradial + 1 * p.nangular + n] == 0);
        double t1 = r1 / p.angular_cutoff, t2 = r2 / p.angular_cutoff;
        double fc1 = pow(1 - t1, 3) * (1 + 3 * t1 + 6 * t1 * t1);
        double fc2 = pow(1 - t2, 3) * (1 + 3 * t2 + 6 * t2 * t2);
        double want = pow(2.0, 1 - p.angular_zeta[n]) *
                      pow(1 + p.angular_lambda[n] * cth, p.angular_zeta[n]) *
                      exp(-p.angular_eta[n] * (r1 * r1 + r2 * r2)) * fc1 * fc2;
        assert_rel_close(G[2 * p.nradial + 2 * p.nangular + n], want, 1e-12, 1e-300);
    }
    free(G);
    free(scr);
}

/* Random cluster of n atoms with 1.0 angstrom minimum separation in a cube
 * of edge L; species random among nel slots. */
static void random_cluster(nd_rng *r, int n, double L, int nel, double *x, int *species)
{
    for (int i = 0; i < n; i++) {
        for (;;) {
            for (int k = 0; k < 3; k++)
                x[3 * i + k] = L * nd_rng_uniform(r);
            int ok = 1;
            for (int j = 0; j < i && ok; j++) {
                double d2 = 0;
                for (int k = 0; k < 3; k++)
                    d2 += pow(x[3 * i + k] - x[3 * j + k], 2);
                ok = d2 > 1.0;
            }
            if (ok)
                break;
        }
        species[i] = (int)nd_rng_below(r, (uint64_t)nel);
    }
}

/* u . G_i for atom i with all other atoms as neighbours. */
static double contracted(const nd_descriptor_params *p, int nel, const double *x, const int *sp,
                         int n, int i, const double *u, double *G, double *scr, int *iscr)
{
    int nbr[64], nn = 0;
    for (int j = 0; j < n; j++)
        if (j != i)
            nbr[nn++] = j;
    nd_descriptor_atom(p, nel, x, sp, i, nbr, nn, G, scr, iscr);
    double s = 0;
    for (int f = 0; f < nd_descriptor_size(p, nel); f++)
        s += u[f] * G[f];
    return s;
}

/* Two atoms at many distances, inside and beyond the Gaussian centres:
 * the radial features (computed by recurrence for the uniform default set)
 * equal exp(-eta (r - s)^2) fc(r) evaluated directly. */
static void test_radial_scan(void **state)
{
    (void)state;
    nd_descriptor_params p;
    nd_descriptor_defaults(&p);
    int species[2] = {0, 0}, nbr[1] = {1};
    int D = nd_descriptor_size(&p, 1);
    double *G = calloc((size_t)D, sizeof *G);
    double *scr = malloc(sizeof(double) * nd_descriptor_scratch_doubles(&p, 1, 1));
    int iscr[2];
    for (double r = 0.3085; r < p.radial_cutoff; r += 0.0731) {
        double x[6] = {0, 0, 0, r * 0.6, r * 0.8, 0};
        nd_descriptor_atom(&p, 1, x, species, 0, nbr, 1, G, scr, iscr);
        double t = r / p.radial_cutoff, fc = pow(1 - t, 3) * (1 + 3 * t + 6 * t * t);
        for (int m = 0; m < p.nradial; m++)
            assert_rel_close(G[m], exp(-p.radial_eta[m] * pow(r - p.radial_shift[m], 2)) * fc,
                             1e-12, 1e-300);
    }
    free(G);
    free(scr);
}

/* d(u.G_i)/dx for every atom against central differences (step 1e-5), for
 * the default set and for an uneven one (direct evaluation path). */
static void test_gradient_fd(void **state)
{
    (void)state;
    for (int variant = 0; variant < 2; variant++) {
        nd_descriptor_params p;
        nd_descriptor_defaults(&p);
        if (variant) {
            p.radial_eta[2] = 3.25;
            p.radial_shift[5] = 2.71;
            p.angular_zeta[4] = 3;
            p.angular_eta[1] = 0.125;
        }
        const int nel = 3, n = 12;
        nd_rng r;
        nd_rng_seed(&r, 2385);
        double x[3 * n];
        int sp[n];
        random_cluster(&r, n, 5.5, nel, x, sp);
        int D = nd_descriptor_size(&p, nel);
        double *u = malloc(sizeof(double) * (size_t)D), *G = malloc(sizeof(double) * (size_t)D);
        for (int f = 0; f < D; f++)
            u[f] = nd_rng_normal(&r);
        double *scr = malloc(sizeof(double) * nd_descriptor_scratch_doubles(&p, nel, n));
        int iscr[64], nbr[64];
        double worst = 0;
        for (int i = 0; i < n; i++) {
            int nn = 0;
            for (int j = 0; j < n; j++)
                if (j != i)
                    nbr[nn++] = j;
            double gi[3], gj[3 * 64];
            nd_descriptor_atom_grad(&p, nel, x, sp, i, nbr, nn, u, gi, gj, scr, iscr);
            double gmax = 0;
            for (int k = 0; k < 3 * nn; k++)
                gmax = nd_larger(gmax, fabs(gj[k]));
            for (int a = 0; a < n; a++)
                for (int k = 0; k < 3; k++) {
                    double an;
                    if (a == i)
                        an = gi[k];
                    else {
                        int s = a < i ? a : a - 1;
                        an = gj[3 * s + k];
                    }
                    const double h = 1e-5, x0 = x[3 * a + k];
                    x[3 * a + k] = x0 + h;
                    double ep = contracted(&p, nel, x, sp, n, i, u, G, scr, iscr);
                    x[3 * a + k] = x0 - h;
                    double em = contracted(&p, nel, x, sp, n, i, u, G, scr, iscr);
                    x[3 * a + k] = x0;
                    double fd = (ep - em) / (2 * h);
                    double rel = fabs(an - fd) / nd_larger(fabs(fd), 1e-3 * gmax + 1e-12);
                    worst = nd_larger(worst, rel);
                }
        }
        assert_true(worst <= 1e-6);
        free(u);
        free(G);
        free(scr);
    }
}

/* The shared-radial contraction gives, summed over all atoms, the same
 * gradient as the per-atom one (to rounding); from a kept angular set-up it
 * gives the same bits as without. */
static void test_shared_contraction(void **state)
{
    (void)state;
    nd_descriptor_params p;
    nd_descriptor_defaults(&p);
    const int nel = 3, n = 10;
    nd_rng r;
    nd_rng_seed(&r, 99);
    double x[3 * n];
    int sp[n], row[n];
    random_cluster(&r, n, 4.5, nel, x, sp);
    int D = nd_descriptor_size(&p, nel);
    double *U = malloc(sizeof(double) * (size_t)(n * D));
    double *G0 = malloc(sizeof(double) * (size_t)D), *Gk = malloc(sizeof(double) * (size_t)D);
    for (int i = 0; i < n * D; i++)
        U[i] = nd_rng_normal(&r);
    for (int i = 0; i < n; i++)
        row[n - 1 - i] = i; /* rows in another order than atoms */
    double *scr = malloc(sizeof(double) * nd_descriptor_scratch_doubles(&p, nel, n));
    int iscr[16], nbr[16];
    double g1[3 * n], g2[3 * n], gi[3], gj[3 * 16];
    memset(g1, 0, sizeof g1);
    memset(g2, 0, sizeof g2);
    for (int i = 0; i < n; i++) {
        int nn = 0;
        for (int j = 0; j < n; j++)
            if (j != i)
                nbr[nn++] = j;
        nd_descriptor_atom_grad(&p, nel, x, sp, i, nbr, nn, U + row[i] * D, gi, gj, scr, iscr);
        for (int k = 0; k < 3; k++)
            g1[3 * i + k] += gi[k];
        for (int s = 0; s < nn; s++)
            for (int k = 0; k < 3; k++)
                g1[3 * nbr[s] + k] += gj[3 * s + k];
        nd_descriptor_atom_grad_shared(&p, nel, x, sp, i, nbr, nn, U, row, D, gi, gj, scr, iscr);
        for (int k = 0; k < 3; k++)
            g2[3 * i + k] += gi[k];
        for (int s = 0; s < nn; s++)
            for (int k = 0; k < 3; k++)
                g2[3 * nbr[s] + k] += gj[3 * s + k];
        /* from the angular set-up kept by the feature call: the same bits */
        nd_angular_kept kept;
        double rows[ND_DESC_KEPT_ROWS * 16], gk[3], gjk[3 * 16];
        nd_descriptor_atom(&p, nel, x, sp, i, nbr, nn, G0, scr, iscr);
        nd_descriptor_atom_keep(&p, nel, x, sp, i, nbr, nn, Gk, scr, iscr, &kept, rows);
        assert_true(kept.cnt >= 0);
        assert_memory_equal(Gk, G0, sizeof(double) * (size_t)D);
        nd_descriptor_atom_grad_kept(&p, nel, x, sp, i, nbr, nn, U, row, D, gk, gjk, scr, iscr,
                                     &kept, rows);
        assert_memory_equal(gk, gi, sizeof gk);
        assert_memory_equal(gjk, gj, sizeof(double) * 3 * (size_t)nn);
    }
    for (int i = 0; i < 3 * n; i++)
        assert_close(g2[i], g1[i], 1e-12 * (1 + fabs(g1[i])));
    free(U);
    free(G0);
    free(Gk);
    free(scr);
}

/* The default angular sets take the vectorised kernel of angular_default.c;
 * the same sets in another order take the general pair loops. Features and
 * contracted gradients must agree, set by set, to rounding. */
static void test_default_kernels_match_general(void **state)
{
    (void)state;
    nd_descriptor_params p, q;
    nd_descriptor_defaults(&p);
    q = p;
    for (int n = 0; n < p.nangular; n++) { /* reversed order */
        q.angular_eta[n] = p.angular_eta[p.nangular - 1 - n];
        q.angular_zeta[n] = p.angular_zeta[p.nangular - 1 - n];
        q.angular_lambda[n] = p.angular_lambda[p.nangular - 1 - n];
    }
    const int nel = 3, n = 14, na = p.nangular;
    nd_rng r;
    nd_rng_seed(&r, 4711);
    double x[3 * n];
    int sp[n];
    random_cluster(&r, n, 4.2, nel, x, sp);
    int D = nd_descriptor_size(&p, nel), R = nel * p.nradial;
    double *Gp = malloc(sizeof(double) * (size_t)D), *Gq = malloc(sizeof(double) * (size_t)D);
    double *up = malloc(sizeof(double) * (size_t)D), *uq = malloc(sizeof(double) * (size_t)D);
    double *scr = malloc(sizeof(double) * nd_descriptor_scratch_doubles(&p, nel, n));
    int iscr[16], nbr[16];
    double gip[3], giq[3], gjp[3 * 16], gjq[3 * 16];
    for (int f = 0; f < D; f++)
        up[f] = nd_rng_normal(&r);
    /* the same weights, with the angular sets reversed */
    for (int f = 0; f < D; f++) {
        int g = f < R ? f : R + (f - R) / na * na + (na - 1 - (f - R) % na);
        uq[g] = up[f];
    }
    for (int i = 0; i < n; i++) {
        int nn = 0;
        for (int j = 0; j < n; j++)
            if (j != i)
                nbr[nn++] = j;
        nd_descriptor_atom(&p, nel, x, sp, i, nbr, nn, Gp, scr, iscr);
        nd_descriptor_atom(&q, nel, x, sp, i, nbr, nn, Gq, scr, iscr);
        for (int f = 0; f < D; f++) {
            int g = f < R ? f : R + (f - R) / na * na + (na - 1 - (f - R) % na);
            assert_rel_close(Gq[g], Gp[f], 1e-13, 1e-300);
        }
        nd_descriptor_atom_grad(&p, nel, x, sp, i, nbr, nn, up, gip, gjp, scr, iscr);
        nd_descriptor_atom_grad(&q, nel, x, sp, i, nbr, nn, uq, giq, gjq, scr, iscr);
        for (int k = 0; k < 3; k++)
            assert_close(giq[k], gip[k], 1e-12 * (1 + fabs(gip[k])));
        for (int k = 0; k < 3 * nn; k++)
            assert_close(gjq[k], gjp[k], 1e-12 * (1 + fabs(gjp[k])));
    }
    free(Gp);
    free(Gq);
    free(up);
    free(uq);
    free(scr);
}

/* nd_exp against the C library's exp on a dense grid of [-708, 709]:
 * within 2 ulps (we measured at most 1); exactly 1 at 0; 0 below -708. */
static void test_fast_exp(void **state)
{
    (void)state;
    double worst = 0;
    for (int k = 0; k <= 1417000; k++) {
        double x = -708.0 + 0.001 * k + 1e-7 * (k % 7);
        if (x > 709)
            break;
        double want = exp(x), got = nd_exp(x);
        double ulp = nextafter(want, INFINITY) - want;
        double e = fabs(got - want) / ulp;
        if (e > worst)
            worst = e;
    }
    print_message("# nd_exp: largest difference from exp(): %.2f ulp\n", worst);
    assert_true(worst <= 2.0);
    assert_true(nd_exp(0.0) == 1.0);
    assert_true(nd_exp(-708.5) == 0.0 && nd_exp(-1e5) == 0.0);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_cutoff_derivatives),
        cmocka_unit_test(test_fast_exp),
        cmocka_unit_test(test_defaults_and_check),
        cmocka_unit_test(test_values_by_formula),
        cmocka_unit_test(test_radial_scan),
        cmocka_unit_test(test_gradient_fd),
        cmocka_unit_test(test_shared_contraction),
        cmocka_unit_test(test_default_kernels_match_general),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
