/* Descriptor tangents v_i = sum_k J_ik r_k: against central finite
 * differences of nd_descriptor_atom along r, and against the adjoint
 * identity u . v_i = sum_k r_k . d(u . G_i)/dx_k with nd_descriptor_atom_grad. */
#include "tests/lib/testutil.h"

#include "core/rng.h"
#include "potential/descriptor.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

#define NAT 9
#define NEL 3

/* A cluster of NAT atoms of 3 element slots with all other atoms as
 * neighbours (pairs beyond the cutoff are skipped by the descriptor). */
static void cluster(double *x, int *species, uint64_t seed)
{
    nd_rng r;
    nd_rng_seed(&r, seed);
    for (int i = 0; i < NAT; i++) {
        species[i] = i % NEL;
        for (;;) {
            for (int c = 0; c < 3; c++)
                x[3 * i + c] = 2.385 * (2 * nd_rng_uniform(&r) - 1);
            int okd = 1;
            for (int j = 0; j < i; j++) {
                double d2 = 0;
                for (int c = 0; c < 3; c++)
                    d2 += (x[3 * i + c] - x[3 * j + c]) * (x[3 * i + c] - x[3 * j + c]);
                okd &= d2 > 0.8 * 0.8;
            }
            if (okd)
                break;
        }
    }
}

/* Descriptor parameters with short cutoffs so that some pairs are cut. */
static void params(nd_descriptor_params *p)
{
    nd_descriptor_defaults(p);
    p->radial_cutoff = 3.7;
    p->angular_cutoff = 3.1;
}

static void test_against_differences(void **state)
{
    (void)state;
    nd_descriptor_params p;
    params(&p);
    const int D = nd_descriptor_size(&p, NEL);
    double x[3 * NAT], xp[3 * NAT], xm[3 * NAT], rt[3 * NAT];
    int species[NAT], nbr[NAT];
    size_t ns = nd_descriptor_tangent_scratch_doubles(&p, NAT);
    size_t ns2 = nd_descriptor_scratch_doubles(&p, NEL, NAT);
    double *scr = malloc(sizeof(double) * (ns > ns2 ? ns : ns2));
    int iscr[NAT];
    double *v = malloc(sizeof(double) * (size_t)D), *gp = malloc(sizeof(double) * (size_t)D),
           *gm = malloc(sizeof(double) * (size_t)D);
    double worst = 0;
    for (uint64_t seed = 1; seed <= 4; seed++) {
        cluster(x, species, seed);
        nd_rng r;
        nd_rng_seed(&r, 100 + seed);
        for (int c = 0; c < 3 * NAT; c++)
            rt[c] = nd_rng_normal(&r);
        for (int i = 0; i < NAT; i++) {
            int nn = 0;
            for (int j = 0; j < NAT; j++)
                if (j != i)
                    nbr[nn++] = j;
            nd_descriptor_atom_tangent(&p, NEL, x, species, i, nbr, nn, rt, v, scr, iscr);
            const double h = 1e-5;
            for (int c = 0; c < 3 * NAT; c++) {
                xp[c] = x[c] + h * rt[c];
                xm[c] = x[c] - h * rt[c];
            }
            nd_descriptor_atom(&p, NEL, xp, species, i, nbr, nn, gp, scr, iscr);
            nd_descriptor_atom(&p, NEL, xm, species, i, nbr, nn, gm, scr, iscr);
            for (int f = 0; f < D; f++) {
                double fd = (gp[f] - gm[f]) / (2 * h);
                double e = fabs(fd - v[f]) / (1 + fabs(fd));
                if (e > worst)
                    worst = e;
                assert_close(v[f], fd, 1e-7 * (1 + fabs(fd)));
            }
        }
    }
    print_message("# largest relative difference from central differences: %.2e\n", worst);
    free(scr);
    free(v);
    free(gp);
    free(gm);
}

/* u . v_i = sum_k r_k . d(u . G_i)/dx_k; variant 1 uses uneven radial and
 * angular sets (the general loops instead of the default kernels). */
static void adjoint_identity(int variant)
{
    nd_descriptor_params p;
    params(&p);
    if (variant) {
        p.radial_eta[2] = 3.25;
        p.radial_shift[5] = 2.71;
        p.angular_zeta[4] = 3;
        p.angular_eta[1] = 0.125;
    }
    const int D = nd_descriptor_size(&p, NEL);
    double x[3 * NAT], rt[3 * NAT], gi[3], gj[3 * NAT];
    int species[NAT], nbr[NAT], iscr[NAT];
    size_t ns = nd_descriptor_tangent_scratch_doubles(&p, NAT);
    size_t ns2 = nd_descriptor_scratch_doubles(&p, NEL, NAT);
    double *scr = malloc(sizeof(double) * (ns > ns2 ? ns : ns2));
    double *u = malloc(sizeof(double) * (size_t)D), *v = malloc(sizeof(double) * (size_t)D);
    cluster(x, species, 11);
    nd_rng r;
    nd_rng_seed(&r, 12);
    for (int c = 0; c < 3 * NAT; c++)
        rt[c] = nd_rng_normal(&r);
    for (int f = 0; f < D; f++)
        u[f] = nd_rng_normal(&r);
    for (int i = 0; i < NAT; i++) {
        int nn = 0;
        for (int j = 0; j < NAT; j++)
            if (j != i)
                nbr[nn++] = j;
        nd_descriptor_atom_tangent(&p, NEL, x, species, i, nbr, nn, rt, v, scr, iscr);
        nd_descriptor_atom_grad(&p, NEL, x, species, i, nbr, nn, u, gi, gj, scr, iscr);
        double lhs = 0, rhs = 0;
        for (int f = 0; f < D; f++)
            lhs += u[f] * v[f];
        for (int c = 0; c < 3; c++)
            rhs += gi[c] * rt[3 * i + c];
        for (int s = 0; s < nn; s++)
            for (int c = 0; c < 3; c++)
                rhs += gj[3 * s + c] * rt[3 * nbr[s] + c];
        assert_close(lhs, rhs, 1e-11 * (1 + fabs(rhs)));
    }
    free(scr);
    free(u);
    free(v);
}

static void test_adjoint_identity(void **state)
{
    (void)state;
    adjoint_identity(0);
}

static void test_adjoint_identity_general(void **state)
{
    (void)state;
    adjoint_identity(1);
}

/* A zero displacement, and a rigid translation, change nothing. */
static void test_translation(void **state)
{
    (void)state;
    nd_descriptor_params p;
    params(&p);
    const int D = nd_descriptor_size(&p, NEL);
    double x[3 * NAT], rt[3 * NAT];
    int species[NAT], nbr[NAT], iscr[NAT];
    double *scr = malloc(sizeof(double) * nd_descriptor_tangent_scratch_doubles(&p, NAT) * 2);
    double *v = malloc(sizeof(double) * (size_t)D);
    cluster(x, species, 21);
    for (int i = 0; i < NAT; i++) {
        rt[3 * i] = 0.37;
        rt[3 * i + 1] = -1.21;
        rt[3 * i + 2] = 2.385;
    }
    int nn = 0;
    for (int j = 1; j < NAT; j++)
        nbr[nn++] = j;
    nd_descriptor_atom_tangent(&p, NEL, x, species, 0, nbr, nn, rt, v, scr, iscr);
    for (int f = 0; f < D; f++)
        assert_close(v[f], 0, 1e-12);
    free(scr);
    free(v);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_against_differences),
        cmocka_unit_test(test_adjoint_identity),
        cmocka_unit_test(test_adjoint_identity_general),
        cmocka_unit_test(test_translation),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
