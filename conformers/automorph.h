/* Graph automorphisms of a molecule: the atom permutations that map the
 * bond graph (with elements, charges, bond orders) onto itself. Used to
 * compare conformers up to symmetry-equivalent atoms (methyl and tert-butyl
 * groups, ring flips, carboxylate oxygens). */
#ifndef ND_AUTOMORPH_H
#define ND_AUTOMORPH_H

#include "core/molecule.h"

typedef struct nd_automorphs {
    int natoms;   /* atoms per permutation */
    int count;    /* number of permutations found (identity first) */
    int complete; /* 1 if all automorphisms were enumerated, 0 if the cap stopped it */
    int *perm;    /* count * natoms: perm[k * natoms + i] is the image of atom i */
} nd_automorphs;

/* Enumerates automorphisms of the subgraph of atoms with keep[i] != 0 (all
 * atoms when keep is NULL), up to max_count of them. Atoms outside the
 * subgraph map to themselves, but they still colour the atoms they are
 * bonded to (so CH3 and CH2 carbons stay apart when hydrogens are dropped).
 * Needs the bond table. out->perm is malloc'd; free with nd_automorphs_free.
 * ND_EINPUT without bonds for more than one atom; ND_ENOMEM. */
int nd_automorphs_find(const nd_molecule *m, const int *keep, int max_count, nd_automorphs *out,
                       nd_error *err);

/* Frees out->perm; accepts NULL. */
void nd_automorphs_free(nd_automorphs *a);

#endif
