/* Optimal superposition and RMSD of two structures of one molecule. */
#ifndef ND_RMSD_H
#define ND_RMSD_H

#include "core/status.h"

/* Least-squares RMSD (angstrom) between point sets a and b (n points,
 * 3n doubles each) after optimal translation and rotation of b onto a
 * (proper rotations only, no reflection). Uses the quaternion form of the
 * Kabsch problem: the largest eigenvalue of Horn's 4x4 matrix (B. K. P.
 * Horn, J. Opt. Soc. Am. A 4, 629, 1987; W. Kabsch, Acta Cryst. A 32, 922,
 * 1976). If rot is not NULL it receives the 3x3 row-major rotation R and
 * shift the translation t with a_i ~ R b_i + t. Returns the RMSD; 0 when
 * n < 1. */
double nd_rmsd_superpose(int n, const double *a, const double *b, double *rot, double *shift);

/* RMSD over the atoms listed in idx (m of them) with b's atoms permuted:
 * pairs (a[idx[k]], b[perm[idx[k]]]). perm may be NULL for the identity. */
double nd_rmsd_subset(int m, const int *idx, const double *a, const double *b, const int *perm);

/* Applies x -> R x + t to n points in place. */
void nd_rmsd_apply(int n, double *x, const double *rot, const double *shift);

#endif
