/* Analytic test potentials shared by all tests and benchmarks, each an
 * nd_energy_fn with exact gradients (checked by finite differences in
 * tests/unit/optimize/test_analytic.c), and a small generator of organic
 * test molecules. Not part of the library. Units: whatever the parameters
 * are in (angstrom and kcal/mol for the molecular potential; reduced units
 * for Lennard-Jones with epsilon = sigma = 1). */
#ifndef ND_TEST_ANALYTIC_H
#define ND_TEST_ANALYTIC_H

#include "core/energy.h"
#include "core/molecule.h"
#include "core/status.h"

#include <stdint.h>

/* Lennard-Jones over all pairs: E = sum 4 eps ((s/r)^12 - (s/r)^6).
 * Returns ND_ECOMPUTE for coincident atoms. */
typedef struct nd_test_lj {
    double epsilon, sigma;
} nd_test_lj;
int nd_test_lj_energy(void *ctx, int n, const double *x, double *energy, double *g);

/* 13 atoms: a centre and a regular icosahedron of radius 2^(1/6) sigma,
 * 39 coordinates. */
void nd_test_lj13_icosahedron(double sigma, double *x);

/* Morse over all pairs: E = sum D (1 - exp(-a (r - r_e)))^2, minimum 0 at
 * r = r_e for a diatomic. */
typedef struct nd_test_morse {
    double depth, width, r_eq; /* D, a, r_e */
} nd_test_morse;
int nd_test_morse_energy(void *ctx, int n, const double *x, double *energy, double *g);

/* Separable harmonic well E = sum_i k_i/2 (x_i - c_i)^2 over the 3n
 * coordinates; k and center hold 3n values each (borrowed). */
typedef struct nd_test_harmonic {
    const double *k, *center;
} nd_test_harmonic;
int nd_test_harmonic_energy(void *ctx, int n, const double *x, double *energy, double *g);

/* The Rosenbrock function of `dim` variables laid on the first dim of the
 * 3n coordinates (3n >= dim, else ND_EINVAL):
 *   E = sum_{i < dim-1} [100 (x_{i+1} - x_i^2)^2 + (1 - x_i)^2]
 *     + sum_{i >= dim} (x_i - 1)^2   (padding coordinates, a plain bowl)
 * so the minimum is E = 0 at x = (1, ..., 1) for every coordinate.
 * dim = 2 uses n = 1 (one padding coordinate), dim = 10 uses n = 4 (two). */
typedef struct nd_test_rosenbrock {
    int dim;
} nd_test_rosenbrock;
int nd_test_rosenbrock_energy(void *ctx, int n, const double *x, double *energy, double *g);

/* A simple bonded molecular potential built from a molecule's bond table
 * (kcal/mol, angstrom). Invented for tests, not a force field:
 *   bonds     k_b/2 (r - r0)^2, r0 = sum of covalent radii (Cordero 2008)
 *             times (1 - 0.1 (order - 1)); k_b = 700, 1000, 1300 for orders 1-3
 *   angles    k_a/2 (cos t - cos t0)^2, k_a = 100; t0 = 180, 120 or 109.47
 *             degrees for a centre with a triple (or two double) bond, a
 *             double bond, or only single bonds
 *   torsions  V3/2 (1 + cos 3 phi), V3 = 0.3, about single bonds between
 *             two all-single centres; V2/2 (1 - cos 2 phi), V2 = 10, about
 *             double bonds and 5 about single bonds joining two double-bond centres
 *   pairs     eps ((R/r)^12 - 2 (R/r)^6), eps = 0.1, R = r_cov,i + r_cov,j
 *             + 1.6, over pairs more than two bonds apart (1-4 pairs halved)
 * Needs a bond table (ND_EINPUT otherwise). Free with nd_test_bonded_free. */
typedef struct nd_test_bonded nd_test_bonded;
int nd_test_bonded_new(nd_test_bonded **out, const nd_molecule *mol, nd_error *err);
void nd_test_bonded_free(nd_test_bonded *b);
int nd_test_bonded_energy(void *ctx, int n, const double *x, double *energy, double *g);

/* A potential that delegates to inner and fails on its `fail_at`-th call
 * (1-based): mode 0 returns ND_ECOMPUTE, 1 a NaN energy, 2 a NaN gradient
 * on atom 2 (index 1), 3 returns ND_EDOMAIN; mode 4 instead returns the
 * gradient with its sign flipped from that call on (a potential whose
 * gradient contradicts its energy, to make a line search fail). Counts calls in `calls`
 * atomically; which call is the fail_at-th depends on thread scheduling when
 * called in parallel (tests only). */
typedef struct nd_test_faulty {
    nd_energy inner;
    int fail_at, mode, calls;
} nd_test_faulty;
int nd_test_faulty_energy(void *ctx, int n, const double *x, double *energy, double *g);

/* Test molecules from a small generator: straight, branched and cyclic
 * alkanes, alcohols, ethers, amines, a thiol, halides and benzenes, with
 * hydrogens, idealised bond lengths (covalent radii) and tetrahedral or
 * trigonal directions, all-anti chains. nd_test_molecule_build writes
 * molecule i (0 <= i < count) with its bond table into mol (initialised
 * by the caller, cleared first). */
int nd_test_molecule_count(void);
const char *nd_test_molecule_name(int i);
int nd_test_molecule_build(int i, nd_molecule *mol, nd_error *err);

/* Adds normal deviates of standard deviation sigma to the 3n coordinates,
 * from a generator seeded with seed. */
void nd_test_perturb(int n, double *x, double sigma, uint64_t seed);

/* Central finite-difference check of g at x with step h: returns the
 * largest |g_fd - g| over the coordinates (or -1 on a potential error). */
double nd_test_gradient_error(const nd_energy *pot, int n, const double *x, double h);

#endif
