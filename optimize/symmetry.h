/* Rotational symmetry number of a structure: the number of proper rotations
 * (the identity included) that map the molecule onto itself, atoms onto atoms
 * of the same element and mass. */
#ifndef ND_SYMMETRY_H
#define ND_SYMMETRY_H

#include "core/status.h"

/* Default tolerance, angstrom: an image atom must lie this close to an atom
 * of the same kind. Minimised structures are symmetric to ~1e-3 angstrom;
 * 0.05 leaves room for loosely converged ones without merging distinct
 * positions, which in molecules are tenths of an angstrom apart or more
 * (common practice, no source). */
#define ND_SYMMETRY_TOL 0.05

/* Largest rotation order tried about one axis. */
#define ND_SYMMETRY_MAX_ORDER 12

typedef struct nd_symmetry {
    int sigma;     /* rotational symmetry number (order of the rotation group; 1 or 2 if linear) */
    int linear;    /* 1 for a linear structure */
    int naxes;     /* distinct rotation axes found (0 for linear) */
    int max_order; /* highest axis order found (1 if none) */
} nd_symmetry;

/* Finds the rotation group of n atoms (element z, mass, coordinates x 3n,
 * angstrom) with tolerance tol (0 = ND_SYMMETRY_TOL). Linearity is decided
 * as in modes.h (nd_modes_is_linear with ND_MODES_LINEAR_TOL), so the
 * symmetry number and the normal modes agree on it. One atom has sigma 1.
 *
 * Method: every rotation axis passes through the centre of mass. Candidate
 * axes are the principal axes of inertia, the directions to each atom, to
 * the midpoint of each pair of like atoms equidistant from the centre, and,
 * for spherical tops, the normals of planes through a reference atom and two
 * like atoms on its shell (an axis of order >= 3 either contains that atom or
 * moves it around a circle through at least three like atoms); that set
 * contains every axis. Each distinct axis is tried with the orders allowed
 * by the counts of like atoms on its rings, highest first, and the group
 * order is 1 + sum over axes of (order - 1), since each non-identity
 * rotation has exactly one axis. A linear structure has sigma 2 when it is
 * centrosymmetric, else 1. Cost grows as n^2 times the number of candidate
 * axes, which stays small for structures without symmetry.
 *
 * Returns ND_OK, ND_EINVAL (n <= 0, bad arguments) or ND_ENOMEM. */
int nd_symmetry_find(int n, const int *z, const double *mass, const double *x, double tol,
                     nd_symmetry *out, nd_error *err);

#endif
