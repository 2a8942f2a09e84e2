/* Normal modes from a Hessian: mass-weighting, projection of translations and
 * rotations, diagonalisation, frequencies, reduced masses, force constants,
 * and the imaginary-mode check. */
#ifndef ND_MODES_H
#define ND_MODES_H

#include "core/energy.h"
#include "core/molecule.h"
#include "core/status.h"
#include "optimize/hessian.h"

/* Linearity tolerance, angstrom: a molecule is linear when the mass-weighted
 * rms distance of its atoms from the axis of least inertia, sqrt(I_min / M),
 * is below this. 0.01 angstrom is about a 1 degree bend of CO2; minimised
 * linear molecules are linear to ~1e-3 angstrom or better (common practice,
 * no source). */
#define ND_MODES_LINEAR_TOL 0.01

/* Imaginary-mode check defaults (see nd_modes_check). 30 cm^-1 is in the
 * middle of the 20-50 cm^-1 that soft torsions and methyl rotors of
 * converged minima commonly show as spurious imaginary values (common
 * practice, no source); 0.05 kcal/mol/angstrom is the RMS force tolerance
 * of the ranking convergence preset (converge.h), so every structure that
 * the minimiser called converged has a "small" residual gradient. */
#define ND_MODES_NOISE_FREQ 30.0  /* cm^-1 */
#define ND_MODES_NOISE_GRAD 0.05  /* kcal/mol/angstrom, rms */

/* The normal modes of one structure. Arrays are malloc'd; free with
 * nd_modes_free. Modes are in ascending order of eigenvalue, so imaginary
 * modes (negative frequencies) come first. */
typedef struct nd_modes {
    int natoms;        /* atoms analysed (the free atoms) */
    int *atoms;        /* natoms indices of those atoms in the molecule */
    double *mass;      /* natoms masses used, amu */
    int linear;        /* 1 if the structure is linear (5 external modes) */
    int nexternal;     /* projected modes: 6, 5 (linear), 3 (one atom), 0 (partial Hessian) */
    int nmodes;        /* vibrational modes: 3 natoms - nexternal */
    double *eigval;    /* nmodes eigenvalues of the mass-weighted Hessian, kcal/mol/angstrom^2/amu */
    double *freq;      /* nmodes wavenumbers, cm^-1; imaginary ones as negative numbers */
    double *vec;       /* nmodes x 3 natoms Cartesian displacements, each of unit length */
    double *redmass;   /* nmodes reduced masses, amu, for the unit-length Cartesian
                          displacement vec: mu = 1 / sum_i |l_i|^2 where l = M^-1/2 q and q
                          is the normalised mass-weighted eigenvector */
    double *k_kcal;    /* nmodes force constants lambda * mu, kcal/mol/angstrom^2 (curvature
                          along vec; negative if imaginary). For a diatomic these are the
                          bond's mu and k times (1 + rho)^2 / (1 + rho^2), rho = m1 / m2 */
    double *k_mdyn;    /* nmodes force constants, mdyn/angstrom */
    double ext_freq[6]; /* signed wavenumbers of the raw Hessian within the translation and
                           rotation space (nexternal used); ~0 at a converged minimum */
    double inertia[3]; /* principal moments, amu angstrom^2, ascending */
} nd_modes;

typedef struct nd_modes_opts {
    double linear_tol; /* angstrom; 0 = ND_MODES_LINEAR_TOL */
} nd_modes_opts;

/* Frees the arrays of m and zeroes it. Accepts NULL. */
void nd_modes_free(nd_modes *m);

/* Masses for mass-weighting: the isotope of mol->isotope[i] when set (e.g. 2
 * for deuterium), else the standard atomic weight. ND_EINPUT naming the atom
 * when an element or isotope is not in the table. mass has natoms entries. */
int nd_modes_masses(const nd_molecule *mol, double *mass, nd_error *err);

/* Principal moments of inertia (amu angstrom^2, ascending) of n atoms about
 * their centre of mass; axes (3x3 row-major, row k = axis of moment k) may be
 * NULL. Returns ND_OK or ND_ECOMPUTE if the eigensolver fails. */
int nd_modes_inertia(int n, const double *mass, const double *x, double moments[3],
                     double axes[9], nd_error *err);

/* 1 if the n atoms are linear within tol angstrom (see ND_MODES_LINEAR_TOL);
 * 0 otherwise (and for n < 2). */
int nd_modes_is_linear(int n, const double *mass, const double *x, double tol);

/* Normal modes from a Hessian.
 *
 * n atoms at x (3 n) with masses mass (n); frozen (n, nonzero = frozen, or
 * NULL) says which atoms h covers: h is the (3 nfree)^2 row-major Hessian of
 * nd_hessian_compute, kcal/mol/angstrom^2. With no frozen atom the
 * translations and rotations are projected out (Eckart conditions: the six,
 * or five for a linear molecule, rigid motions in mass-weighted coordinates
 * about the centre of mass and principal axes), and the Hessian is
 * diagonalised in the orthonormal complement of that space, so exactly
 * 3n - 6 (3n - 5) vibrations come out. With frozen atoms nothing is
 * projected (the frozen atoms hold the frame), giving 3 nfree modes.
 * *out is filled (previous contents are not freed); free with
 * nd_modes_free. Returns ND_OK, ND_EINVAL, ND_EINPUT (bad mass), ND_ENOMEM
 * or ND_ECOMPUTE (eigensolver failure, non-finite Hessian). */
int nd_modes_compute(int n, const double *x, const double *mass, const int *frozen,
                     const double *h, const nd_modes_opts *opts, nd_modes *out, nd_error *err);

/* The mass-weighted Hessian with the rigid motions projected out,
 * P M^-1/2 H M^-1/2 P with P = 1 - D D^T over the (3n)^2 coordinates (no
 * frozen atoms), for checks against other eigensolvers. hp is (3n)^2. */
int nd_modes_projected(int n, const double *x, const double *mass, const double *h,
                       const nd_modes_opts *opts, double *hp, nd_error *err);

/* Options of the imaginary-mode check. */
typedef struct nd_check_opts {
    double noise_freq; /* cm^-1; 0 = ND_MODES_NOISE_FREQ */
    double noise_grad; /* kcal/mol/angstrom rms; 0 = ND_MODES_NOISE_GRAD */
} nd_check_opts;

typedef enum nd_verdict {
    ND_VERDICT_MINIMUM = 0,   /* no imaginary mode (noise-level ones may be present) */
    ND_VERDICT_SADDLE = 1     /* at least one real imaginary mode */
} nd_verdict;

typedef struct nd_check {
    nd_verdict verdict;
    int nimag;         /* real imaginary modes (the order of the saddle) */
    int nnoise;        /* imaginary modes dismissed as numerical noise */
    int first_imag;    /* index of the most negative real imaginary mode, or -1 */
    double grad_rms;   /* residual gradient rms over the analysed atoms, kcal/mol/angstrom */
    double lowest;     /* lowest frequency, cm^-1 (0 if there are no modes) */
} nd_check;

/* The imaginary-mode check.
 *
 * A mode with a negative frequency is numerical noise when |nu| is below
 * noise_freq AND the residual gradient (rms over the analysed atoms' 3 n
 * components of g, which has 3 * natoms-in-molecule entries) is below
 * noise_grad; otherwise it is a real imaginary mode. Why: at a point that is
 * not exactly stationary, the Hessian is not exactly rotation-invariant and
 * the residual force leaks into the projected space, and in flat regions
 * (methyl rotors, soft torsions) the finite-difference error and the
 * remaining distance to the minimum can flip the sign of a tiny curvature;
 * these give |nu| of a few to a few tens of cm^-1. A true saddle of
 * chemical interest has a clearly negative curvature, and a large residual
 * gradient means the structure is not a stationary point, so nothing may be
 * dismissed (common practice, no source). g may be NULL (treated as zero
 * gradient). */
void nd_modes_check(const nd_modes *m, const double *g, const nd_check_opts *opts, nd_check *out);

/* 1 if a mode of wavenumber freq (cm^-1) counts as a real imaginary mode
 * under the rule of nd_modes_check at residual gradient rms grad_rms. */
int nd_modes_is_imaginary(double freq, double grad_rms, const nd_check_opts *opts);

/* Hessian, normal modes and check of mol under pot in one call: the
 * composition the conformer search uses for each minimum. frozen may be
 * NULL; hopts, mopts, copts may be NULL for defaults. g (3 natoms, may be
 * NULL) receives the gradient at the structure. */
int nd_modes_analyse(const nd_energy *pot, const nd_molecule *mol, const int *frozen,
                     const nd_hessian_opts *hopts, const nd_modes_opts *mopts,
                     const nd_check_opts *copts, nd_modes *modes, nd_check *check, double *g,
                     nd_error *err);

/* Frame k of nframes of an animation of mode `mode`: x0 displaced along the
 * mode's Cartesian vector by amplitude * sin(2 pi k / nframes), in angstrom
 * for the atom that moves most (frozen atoms stay). out has 3 natoms_mol
 * entries (the whole molecule). */
int nd_modes_frame(const nd_modes *m, int mode, int natoms_mol, const double *x0, double amplitude,
                   int k, int nframes, double *out, nd_error *err);

#endif
