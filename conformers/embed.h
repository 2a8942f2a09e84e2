/* 3D coordinates from a molecular graph by distance geometry.
 *
 * Steps (see embed.c for the details and sources):
 *  1. bounds on every interatomic distance: bonds from covalent radii and
 *     bond order, 1-3 pairs from the angles of each atom's hybridisation and
 *     rings, 1-4 pairs from the cis and trans limits of the torsion (fixed
 *     for configured double bonds and flat rings), van der Waals lower
 *     bounds beyond;
 *  2. triangle-inequality smoothing of the bounds;
 *  3. random distances within the bounds (from the caller's seed), the
 *     metric matrix and its leading eigenvectors (subspace iteration with a
 *     Jacobi Rayleigh-Ritz step, our own loops so that the bits do not
 *     depend on the BLAS thread count);
 *  4. refinement of an error function over all distance bounds, signed
 *     volumes at stereocentres (all four neighbour triples) and planarity
 *     of sp2 centres, double bonds and flat rings: first in four
 *     dimensions (atoms can pass each other, centres invert freely), then
 *     with the fourth coordinate squeezed out, then in three;
 *  5. a cleanup minimisation of a simple force function (bonds, angles,
 *     fixed torsions, volumes, repulsion) that fixes bond lengths and
 *     angles; then a check of bonds, stereo, planarity and contacts,
 *     retried from new random distances when it fails.
 * Every minimisation is the optimize module's L-BFGS on an nd_energy.
 * Disconnected parts are embedded one by one and placed side by side. */
#ifndef ND_EMBED_H
#define ND_EMBED_H

#include <stdint.h>

#include "conformers/topology.h"
#include "core/molecule.h"

typedef struct nd_embed_options {
    int max_attempts;     /* random starts per conformer before giving up (30) */
    int max_steps;        /* minimiser steps per stage (2000) */
    double bond_tol;      /* largest accepted |bond - target| after cleanup, angstrom (0.05) */
    double contact_ratio; /* smallest accepted distance / (sum of van der Waals radii) for
                             atoms three or more bonds apart (0.6) */
    double part_gap;      /* gap between the spheres of disconnected parts, angstrom (3.0) */
} nd_embed_options;

/* Fills *o with the defaults shown above. */
void nd_embed_options_default(nd_embed_options *o);

/* Coordinates of conformer number index (0, 1, ...) of mol from seed: the
 * same (mol, seed, index) gives the same coordinates bit for bit; different
 * indices give independent starts. xyz (3 * natoms) receives angstrom
 * coordinates; mol is not changed. opt may be NULL for the defaults.
 * Returns ND_OK; ND_EINPUT for a molecule without a usable bond table or
 * with aromatic bond orders; ND_ECOMPUTE when no start passed the checks
 * within opt->max_attempts (xyz then holds the best attempt). */
int nd_embed(const nd_molecule *mol, uint64_t seed, int index, const nd_embed_options *opt,
             double *xyz, nd_error *err);

/* Same as nd_embed, writing into mol->xyz and setting mol->dimension = 3. */
int nd_embed_molecule(nd_molecule *mol, uint64_t seed, int index, const nd_embed_options *opt,
                      nd_error *err);

/* The target length of bond b, angstrom, as the embedding uses it:
 * Cordero covalent radii with Pauling's bond-order relation, an sp2/sp
 * correction, and conjugated bonds (flat rings, amides, esters) at order
 * 1.5. */
double nd_embed_bond_length(const nd_molecule *mol, const nd_topology *t, int b);

/* Van der Waals radius used for contacts (Bondi 1964; 2.0 for elements
 * not in that table), angstrom. */
double nd_embed_vdw_radius(int z);

/* What nd_embed_check found in a geometry. */
typedef struct nd_embed_report {
    double worst_bond;      /* largest |bond length - nd_embed_bond_length|, angstrom */
    int worst_bond_index;   /* that bond, or -1 when there are no bonds */
    double closest_ratio;   /* smallest distance / (vdW sum) over atoms >= 3 bonds apart or in
                               different parts (large when there are none) */
    int closest_a, closest_b;
    int chirality_wrong;    /* stereocentres whose signed volume has the wrong sign or is
                               nearly flat */
    int config_wrong;       /* configured double bonds whose dihedral disagrees */
    double worst_flat;      /* largest out-of-plane distance in a flat ring or at an sp2
                               centre, angstrom */
} nd_embed_report;

/* Checks the geometry xyz of mol against its own stereo and the embedding's
 * targets. Returns ND_OK (the verdict is in *rep), ND_ENOMEM or ND_EINPUT. */
int nd_embed_check(const nd_molecule *mol, const double *xyz, nd_embed_report *rep, nd_error *err);

#endif
