/* Evaluating a model on the atoms of one molecule: energies, exact
 * gradients, per-member results, batches of structures, and the adapter to
 * the nd_energy seam (core/energy.h).
 *
 * An nd_potential binds a model to an element list (the atomic numbers of
 * the n atoms, in order) and a mode: the ensemble mean, or one member k.
 * It keeps workspaces from call to call (a pool: one per concurrent caller,
 * each grown to the largest batch seen), so calls from several threads with
 * the same potential are safe and the hot loops do not allocate.
 *
 * Every result is a fixed-order sum per atom (neighbours sorted by index,
 * atoms of each element in a fixed order), so it is the same bit for bit at
 * any thread count and whether a structure is evaluated alone or in a batch
 * (given a BLAS whose dgemm rows do not depend on the other rows, which the
 * tests check for ours). */
#ifndef ND_POTENTIAL_H
#define ND_POTENTIAL_H

#include "core/energy.h"
#include "core/status.h"
#include "potential/model.h"

typedef struct nd_potential nd_potential;

#define ND_POTENTIAL_MEAN (-1) /* mode: mean of all ensemble members */

/* Binds model (which must outlive the potential, unchanged: its input
 * scaling is folded into a copy of the first layer here) to n atoms of atomic
 * numbers z (copied), with mode ND_POTENTIAL_MEAN or a member index
 * 0 .. K-1. ND_EDOMAIN (naming the atom, element and the model's domain)
 * for an element the model does not cover; ND_EINVAL for a bad mode or n.
 * Charge is checked by nd_model_check, not here. Free with
 * nd_potential_free. */
int nd_potential_new(nd_potential **out, const nd_model *model, int n, const int *z, int mode,
                     nd_error *err);

/* Frees p and its workspaces; accepts NULL. */
void nd_potential_free(nd_potential *p);

/* The nd_energy seam for p: fn evaluates one structure, batch evaluates m
 * structures of the same atoms as tall matrices. ctx is p (not owned). */
nd_energy nd_potential_energy(nd_potential *p);

int nd_potential_atoms(const nd_potential *p);
int nd_potential_mode(const nd_potential *p);
const nd_model *nd_potential_model(const nd_potential *p);

/* The general call: m structures of the atoms (x: m * 3n, angstrom).
 * Any output may be NULL:
 *   energy        m        energy in the potential's mode (kcal/mol)
 *   grad          m * 3n   its gradient (kcal/mol/angstrom)
 *   member_energy m * K    energy of each member, structure-major
 *   member_grad   m * K * 3n  gradient of each member (costs K backward passes)
 * ND_ECOMPUTE for non-finite coordinates or results (for example atoms on
 * top of each other), ND_ENOMEM. */
int nd_potential_compute(nd_potential *p, int m, const double *x, double *energy, double *grad,
                         double *member_energy, double *member_grad, nd_error *err);

#endif
