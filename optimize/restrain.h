/* Frozen atoms and harmonic restraints, applied by wrapping a potential:
 * nd_restraints_energy() returns an nd_energy that adds the restraint
 * energies to the inner potential and zeroes the gradient of frozen atoms,
 * so any minimiser works with them unchanged.
 *
 * Restraints are harmonic, E = k/2 (q - q0)^2, on a distance (angstrom,
 * k in kcal/mol/A^2), a bond angle or a torsion (degrees at the interface,
 * k in kcal/mol/rad^2; the torsion difference is wrapped into (-180, 180]).
 * A stiff torsion restraint holds a torsion at a target value for relaxed
 * torsion scans: change its target with nd_restraints_set_target between
 * minimisations. */
#ifndef ND_RESTRAIN_H
#define ND_RESTRAIN_H

#include "core/energy.h"
#include "core/status.h"

typedef enum nd_restraint_kind {
    ND_RESTRAIN_DISTANCE = 1, /* atoms i-j */
    ND_RESTRAIN_ANGLE = 2,    /* atoms i-j-k, j the vertex */
    ND_RESTRAIN_TORSION = 3   /* atoms i-j-k-l, about the j-k bond (IUPAC sign convention) */
} nd_restraint_kind;

typedef struct nd_restraints nd_restraints;

/* A restraint set for n atoms around the potential inner (copied; its ctx
 * is borrowed and must outlive the set). Free with nd_restraints_free. */
int nd_restraints_new(nd_restraints **out, const nd_energy *inner, int n, nd_error *err);

/* Frees r; accepts NULL. */
void nd_restraints_free(nd_restraints *r);

/* Freezes atom (0-based). ND_EINVAL for an index out of range. */
int nd_restraints_freeze(nd_restraints *r, int atom, nd_error *err);

/* Adds a restraint of kind on the atoms in atoms[] (2, 3 or 4 distinct
 * indices), target in angstrom or degrees, force constant k >= 0. Returns
 * ND_OK and writes the restraint's index to *index (may be NULL); ND_EINVAL
 * for bad atoms, targets (a negative distance, an angle outside [0, 180])
 * or k, ND_ENOMEM. */
int nd_restraints_add(nd_restraints *r, nd_restraint_kind kind, const int *atoms, double target,
                      double k, int *index, nd_error *err);

/* Changes the target of restraint index (same units as nd_restraints_add). */
int nd_restraints_set_target(nd_restraints *r, int index, double target, nd_error *err);

/* Current value of restraint index at x (angstrom or degrees; torsions in
 * (-180, 180]). NAN for a bad index. */
double nd_restraints_value(const nd_restraints *r, int index, const double *x);

/* Energy of the restraints alone at x (kcal/mol); g (3n) receives their
 * gradient when not NULL (frozen atoms not zeroed). */
double nd_restraints_penalty(const nd_restraints *r, const double *x, double *g);

/* Flags of the frozen atoms (n entries, 1 = frozen), owned by r. */
const unsigned char *nd_restraints_frozen(const nd_restraints *r);

int nd_restraints_count(const nd_restraints *r);

/* The wrapping potential: inner energy + restraint energy, gradient zeroed
 * on frozen atoms. Valid while r lives. Thread-safe as the inner potential
 * is (r is only read). */
nd_energy nd_restraints_energy(const nd_restraints *r);

#endif
