/* The vectorised angular kernel of the default sets: features against the
 * formula of descriptor.h summed pair by pair, and the contracted gradient
 * against central differences of the features, on clusters where some
 * elements have no neighbour, some one, and some several. */
#include "tests/lib/testutil.h"
#include "core/numeric.h"

#include "core/rng.h"
#include "potential/angular_default.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

#define NAT 17
#define NEL 4 /* slot 3 is never used: its pairs must stay zero */

/* NAT atoms at least 0.9 angstrom apart in a cube of edge 4.385; slots 0,
 * 1, 2 with slot 2 rare (every sixth atom). */
static void cluster(nd_rng *r, double *x, int *species)
{
    for (int i = 0; i < NAT; i++) {
        species[i] = i % 6 == 5 ? 2 : i % 2;
        for (;;) {
            for (int k = 0; k < 3; k++)
                x[3 * i + k] = 4.385 * nd_rng_uniform(r);
            int ok = 1;
            for (int j = 0; j < i && ok; j++) {
                double d2 = 0;
                for (int k = 0; k < 3; k++)
                    d2 += pow(x[3 * i + k] - x[3 * j + k], 2);
                ok = d2 > 0.81;
            }
            if (ok)
                break;
        }
    }
}

/* The angular features of atom i by the formula, pair by pair (all other
 * atoms as candidate neighbours). */
static void by_formula(const nd_descriptor_params *p, const double *x, const int *sp, int i,
                       double *GA)
{
    const int na = p->nangular;
    memset(GA, 0, sizeof(double) * (size_t)(NEL * (NEL + 1) / 2 * na));
    const double rc = p->angular_cutoff;
    for (int a = 0; a < NAT; a++)
        for (int b = a + 1; b < NAT; b++) {
            if (a == i || b == i)
                continue;
            double va[3], vb[3], ra = 0, rb = 0, dot = 0;
            for (int k = 0; k < 3; k++) {
                va[k] = x[3 * a + k] - x[3 * i + k];
                vb[k] = x[3 * b + k] - x[3 * i + k];
                ra += va[k] * va[k];
                rb += vb[k] * vb[k];
                dot += va[k] * vb[k];
            }
            ra = sqrt(ra);
            rb = sqrt(rb);
            if (ra >= rc || rb >= rc)
                continue;
            double c = dot / (ra * rb), ta = ra / rc, tb = rb / rc;
            double fa = pow(1 - ta, 3) * (1 + 3 * ta + 6 * ta * ta);
            double fb = pow(1 - tb, 3) * (1 + 3 * tb + 6 * tb * tb);
            int z1 = sp[a] < sp[b] ? sp[a] : sp[b], z2 = sp[a] < sp[b] ? sp[b] : sp[a];
            double *g = GA + (z1 * NEL - z1 * (z1 - 1) / 2 + (z2 - z1)) * na;
            for (int n = 0; n < na; n++)
                g[n] += pow(2.0, 1 - p->angular_zeta[n]) *
                        pow(1 + p->angular_lambda[n] * c, p->angular_zeta[n]) *
                        exp(-p->angular_eta[n] * (ra * ra + rb * rb)) * fa * fb;
        }
}

/* u . GA_i from the kernel. */
static double contracted(const nd_descriptor_params *p, const double *x, const int *sp, int i,
                         const double *u, double *GA, double *scr, int *iscr)
{
    int nbr[NAT], nn = 0;
    for (int j = NAT - 1; j >= 0; j--) /* any order: descending */
        if (j != i)
            nbr[nn++] = j;
    const int D = NEL * (NEL + 1) / 2 * p->nangular;
    memset(GA, 0, sizeof(double) * (size_t)D);
    nd_angular_default_features(p, NEL, x, sp, i, nbr, nn, GA, scr, iscr);
    double s = 0;
    for (int f = 0; f < D; f++)
        s += u[f] * GA[f];
    return s;
}

static void test_features_by_formula(void **state)
{
    (void)state;
    nd_descriptor_params p;
    nd_descriptor_defaults(&p);
    p.angular_eta[4] = 0.1385; /* another second eta */
    assert_true(nd_angular_is_default(&p));
    nd_rng r;
    nd_rng_seed(&r, 8191);
    double x[3 * NAT];
    int sp[NAT], iscr[NAT];
    cluster(&r, x, sp);
    const int D = NEL * (NEL + 1) / 2 * p.nangular;
    double *got = calloc((size_t)D, sizeof(double)), *want = malloc(sizeof(double) * (size_t)D);
    double *u = calloc((size_t)D, sizeof(double));
    double *scr = malloc(sizeof(double) * nd_angular_default_scratch(NEL, NAT));
    for (int i = 0; i < NAT; i++) {
        contracted(&p, x, sp, i, u, got, scr, iscr);
        by_formula(&p, x, sp, i, want);
        for (int f = 0; f < D; f++)
            assert_rel_close(got[f], want[f], 1e-12, 1e-14);
        for (int f = 9 * p.nangular; f < D; f++) /* pair (3, 3) */
            assert_true(got[f] == 0);
    }
    /* a centre with no neighbour inside the cutoff */
    int nbr[1] = {1};
    double far[6] = {0, 0, 0, 0, 0, 9.5};
    memset(got, 0, sizeof(double) * (size_t)D);
    nd_angular_default_features(&p, NEL, far, sp, 0, nbr, 1, got, scr, iscr);
    for (int f = 0; f < D; f++)
        assert_true(got[f] == 0);
    free(got);
    free(want);
    free(u);
    free(scr);
}

/* d(u.GA_i)/dx against central differences (step 1e-5, truncation O(h^2)
 * ~ 1e-10 relative); the centre's term is minus the neighbours' sum. */
static void test_gradient_fd(void **state)
{
    (void)state;
    nd_descriptor_params p;
    nd_descriptor_defaults(&p);
    nd_rng r;
    nd_rng_seed(&r, 2385);
    double x[3 * NAT];
    int sp[NAT], iscr[NAT];
    cluster(&r, x, sp);
    const int D = NEL * (NEL + 1) / 2 * p.nangular;
    double *u = malloc(sizeof(double) * (size_t)D), *GA = malloc(sizeof(double) * (size_t)D);
    for (int f = 0; f < D; f++)
        u[f] = nd_rng_normal(&r);
    double *scr = malloc(sizeof(double) * nd_angular_default_scratch(NEL, NAT));
    double worst = 0;
    for (int i = 0; i < NAT; i += 3) {
        int nbr[NAT], nn = 0;
        for (int j = NAT - 1; j >= 0; j--)
            if (j != i)
                nbr[nn++] = j;
        double gj[3 * NAT], gi[3] = {0, 0, 0}, gmax = 0;
        memset(gj, 0, sizeof gj);
        nd_angular_default_grad(&p, NEL, x, sp, i, nbr, nn, u, gj, scr, iscr);
        for (int s = 0; s < nn; s++)
            for (int k = 0; k < 3; k++) {
                gi[k] -= gj[3 * s + k];
                gmax = nd_larger(gmax, fabs(gj[3 * s + k]));
            }
        for (int a = 0; a < NAT; a++)
            for (int k = 0; k < 3; k++) {
                double an = a == i ? gi[k] : gj[3 * (NAT - 1 - a - (a > i ? 0 : 1)) + k];
                const double h = 1e-5, x0 = x[3 * a + k];
                x[3 * a + k] = x0 + h;
                double ep = contracted(&p, x, sp, i, u, GA, scr, iscr);
                x[3 * a + k] = x0 - h;
                double em = contracted(&p, x, sp, i, u, GA, scr, iscr);
                x[3 * a + k] = x0;
                double fd = (ep - em) / (2 * h);
                worst = nd_larger(worst, fabs(an - fd) / nd_larger(fabs(fd), 1e-3 * gmax + 1e-12));
            }
    }
    print_message("# default angular kernel: worst relative gradient error %.2g\n", worst);
    assert_true(worst <= 1e-6);
    free(u);
    free(GA);
    free(scr);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_features_by_formula),
        cmocka_unit_test(test_gradient_fd),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
