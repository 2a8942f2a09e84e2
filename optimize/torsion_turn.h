/* Rigid turns about a bond, for relaxed torsion scans: before each angle
 * the atoms on one side of the j-k bond are turned so that the torsion
 * starts at its target, and the stiff restraint only holds it there.
 * Left to the restraint alone, a first angle far from the start pulled
 * the end atom through the potential: on a learned potential, which is
 * unconstrained far from its data, an acid's hydrogen left its oxygen. */
#ifndef ND_TORSION_TURN_H
#define ND_TORSION_TURN_H

/* Marks in moving[0..n-1] the smaller of the two sides of the bond j-k
 * (0-based atoms; neighbours in CSR form as nd_molecule_neighbours gives
 * them): the atoms reached from j or from k without crossing j-k. Returns
 * +1 when k's side moves, -1 when j's side does, 0 (moving all zero) when
 * j and k are not bonded or the bond is in a ring. */
int nd_torsion_side(int n, const int *start, const int *adj, int j, int k, unsigned char *moving);

/* Turns the marked atoms of x (3n) by angle radians about the axis from
 * atom j to atom k (right-handed). Turning k's side by +a raises the
 * torsion i-j-k-l (IUPAC sign, as nd_coords_torsion) by a; turning j's
 * side by -a does the same. Nothing moves when j and k coincide. */
void nd_torsion_turn(int n, double *x, const unsigned char *moving, int j, int k, double angle);

#endif
