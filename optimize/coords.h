/* Internal coordinates (distance, bond angle, torsion) and their exact
 * Cartesian gradients, shared by restraints and the model Hessian.
 * Module-internal: not part of nadir.h. */
#ifndef ND_COORDS_H
#define ND_COORDS_H

/* Distance |x_j - x_i| of two atoms (pointers to their 3 coordinates);
 * gradient wrt atom i into d[0..2] and wrt j into d[3..5] when d is not
 * NULL (zero at coincident atoms). */
double nd_coords_distance(const double *xi, const double *xj, double *d);

/* Bond angle i-j-k in radians, [0, pi], j the vertex; gradient wrt i, j, k
 * into d[0..8]. Returns the angle; sets *ok to 0 (and d to zero) when the
 * angle is within 1e-6 rad of 0 or pi or an arm has zero length, where the
 * gradient is not defined. */
double nd_coords_angle(const double *xi, const double *xj, const double *xk, double *d, int *ok);

/* Torsion i-j-k-l in radians, (-pi, pi], IUPAC sign (positive clockwise
 * looking from j to k); gradient wrt i, j, k, l into d[0..11] (Blondel &
 * Karplus, J. Comput. Chem. 17, 1132, 1996). *ok is 0 (d zero) when i-j-k
 * or j-k-l is collinear, where the torsion is undefined. */
double nd_coords_torsion(const double *xi, const double *xj, const double *xk, const double *xl,
                         double *d, int *ok);

#endif
