/* Force calls to converge: nadir's L-BFGS (with and without the Lindh
 * model-Hessian preconditioner) and FIRE, against scipy.optimize's
 * L-BFGS-B (Debian python3-scipy 1.10, same memory of 10 pairs), all on
 * the same C function at the same largest-force tolerance, from the same
 * perturbed start.
 *
 * Molecules: the generated test set of tests/lib/analytic.c (alkanes,
 * branched alkanes, alcohols, ethers, amines, a thiol, halides, rings and
 * benzenes; 29 molecules), each perturbed by 0.1 A Gaussian noise from a
 * fixed seed, with the bonded analytic test potential until the learned
 * potential exists. Force calls are deterministic, so one run of each is
 * its median. Goal (issue 5): median ours <= half of scipy's, every run
 * converged. Exit status 1 if any run failed to converge. */
#include "nadir.h"
#include "tests/lib/analytic.h"
#include "tests/lib/scipy_bridge.h"

#include <stdio.h>
#include <stdlib.h>
#include <string.h>

static int cmp_double(const void *a, const void *b)
{
    double x = *(const double *)a, y = *(const double *)b;
    return (x > y) - (x < y);
}

static double median(double *v, int n)
{
    qsort(v, (size_t)n, sizeof *v, cmp_double);
    return n % 2 ? v[n / 2] : 0.5 * (v[n / 2 - 1] + v[n / 2]);
}

int main(int argc, char **argv)
{
    double force_tol = argc > 1 ? atof(argv[1]) : 0.05; /* kcal/mol/A */
    int have_scipy = nd_test_scipy_available();
    int nmol = nd_test_molecule_count();
    double *plain = calloc((size_t)nmol, sizeof *plain), *pc = calloc((size_t)nmol, sizeof *pc),
           *fire = calloc((size_t)nmol, sizeof *fire), *sp = calloc((size_t)nmol, sizeof *sp),
           *ratio = calloc((size_t)nmol, sizeof *ratio);
    int failures = 0;
    printf("force calls to reach largest force <= %g kcal/mol/A (bonded analytic test potential,\n"
           "start perturbed by 0.1 A; ranking preset otherwise; scipy = scipy.optimize L-BFGS-B)\n\n",
           force_tol);
    printf("%-18s %5s %8s %8s %8s %8s %9s %11s\n", "molecule", "atoms", "lbfgs", "lbfgs+pc", "fire",
           "scipy", "pc/scipy", "dE vs scipy");
    for (int i = 0; i < nmol; i++) {
        nd_molecule m;
        nd_molecule_init(&m);
        nd_error err;
        if (nd_test_molecule_build(i, &m, &err) != ND_OK) {
            fprintf(stderr, "%s\n", err.msg);
            return 1;
        }
        int n = m.natoms;
        nd_test_perturb(n, m.xyz, 0.1, 9000 + (uint64_t)i);
        nd_test_bonded *b;
        if (nd_test_bonded_new(&b, &m, &err) != ND_OK) {
            fprintf(stderr, "%s\n", err.msg);
            return 1;
        }
        nd_energy pot = {nd_test_bonded_energy, NULL, b};
        size_t bytes = 3 * (size_t)n * sizeof(double);
        double *x = malloc(bytes);
        nd_minimize_options o;
        nd_minimize_options_default(&o);
        o.stop.max_force = force_tol;
        o.stop.rms_force = 1e30;  /* the largest force alone, as on scipy's side */
        o.stop.energy_change = 0; /* no early stop on a flat energy */
        o.stop.max_steps = 20000;
        nd_minimize_result r_plain, r_pc, r_fire;
        memcpy(x, m.xyz, bytes);
        int s1 = nd_minimize(&nd_minimizer_lbfgs, &pot, n, x, &o, &r_plain, NULL);
        memcpy(x, m.xyz, bytes);
        int s3 = nd_minimize(&nd_minimizer_fire, &pot, n, x, &o, &r_fire, NULL);
        nd_precond *p = NULL;
        int s2 = nd_precond_new(&p, n, m.z, m.xyz, NULL, 0, &err);
        o.precond = p;
        memcpy(x, m.xyz, bytes);
        if (s2 == ND_OK)
            s2 = nd_minimize(&nd_minimizer_lbfgs, &pot, n, x, &o, &r_pc, NULL);
        nd_test_scipy_result rs = {0, 0, 0, 0};
        int s4 = -1;
        if (have_scipy) {
            memcpy(x, m.xyz, bytes);
            s4 = nd_test_scipy_lbfgsb(&pot, n, x, force_tol, 10, 20000, &rs);
        }
        int ok = s1 == ND_OK && s2 == ND_OK && s3 == ND_OK && (!have_scipy || (s4 == 0 && rs.converged));
        failures += !ok;
        plain[i] = r_plain.force_calls;
        pc[i] = r_pc.force_calls;
        fire[i] = r_fire.force_calls;
        sp[i] = rs.force_calls;
        ratio[i] = have_scipy && rs.force_calls > 0 ? pc[i] / sp[i] : 0;
        printf("%-18s %5d %8d %8d %8d %8d %9.2f %11.2e%s\n", m.title, n, r_plain.force_calls, r_pc.force_calls,
               r_fire.force_calls, rs.force_calls, ratio[i], have_scipy ? r_pc.energy - rs.energy : 0.0,
               ok ? "" : "  NOT CONVERGED");
        nd_precond_free(p);
        nd_test_bonded_free(b);
        free(x);
        nd_molecule_free(&m);
    }
    double mp = median(plain, nmol), mpc = median(pc, nmol), mf = median(fire, nmol);
    printf("\nmedian force calls: lbfgs %.1f, lbfgs+pc %.1f, fire %.1f", mp, mpc, mf);
    if (have_scipy) {
        double ms = median(sp, nmol);
        printf(", scipy %.1f\n", ms);
        printf("median of per-molecule ratios lbfgs+pc / scipy: %.2f (goal <= 0.50)\n", median(ratio, nmol));
        printf("ratio of medians lbfgs+pc / scipy: %.2f; plain lbfgs / scipy: %.2f\n", mpc / ms, mp / ms);
    } else {
        printf("\nscipy not available (/usr/bin/python3 with scipy): no comparison\n");
    }
    printf("runs not converged: %d of %d molecules\n", failures, nmol);
    free(plain);
    free(pc);
    free(fire);
    free(sp);
    free(ratio);
    return failures ? 1 : 0;
}
