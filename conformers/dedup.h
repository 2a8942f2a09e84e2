/* Removing duplicate conformers: two structures are the same conformer when
 * their energies agree within a tolerance and their heavy-atom RMSD after
 * optimal superposition, minimised over the molecule's symmetry-equivalent
 * atom permutations, is below a threshold. */
#ifndef ND_DEDUP_H
#define ND_DEDUP_H

#include "conformers/automorph.h"
#include "core/molecule.h"

typedef struct nd_dedup_options {
    double rmsd;        /* angstrom; heavy-atom RMSD below this is "the same" */
    double energy_tol;  /* kcal/mol; energies further apart are always distinct */
    int max_symmetry;   /* cap on automorphisms enumerated */
} nd_dedup_options;

/* Defaults: 0.125 angstrom, 0.05 kcal/mol, 2000 permutations (common
 * practice for heavy-atom RMSD thresholds is 0.1-0.5 angstrom, no source;
 * we keep it tight because mirror-related or barely distinct minima matter
 * for ranking, and the energy test already merges numerical twins). */
nd_dedup_options nd_dedup_defaults(void);

/* A comparer for one molecule: holds the heavy-atom index list and the
 * symmetry permutations. Free with nd_dedup_free. */
typedef struct nd_dedup nd_dedup;

/* Prepares a comparer for molecule m (needs its bond table). *out is
 * malloc'd; free with nd_dedup_free. */
int nd_dedup_new(const nd_molecule *m, const nd_dedup_options *opt, nd_dedup **out, nd_error *err);
void nd_dedup_free(nd_dedup *d);

/* Smallest heavy-atom RMSD between structures a and b (3n each) over the
 * symmetry permutations. If perm_out is not NULL it receives the best
 * permutation (natoms entries, image in b of each atom of a). */
double nd_dedup_rmsd(const nd_dedup *d, const double *a, const double *b, int *perm_out);

/* The same RMSD between a and the mirror image of b (b with x negated): near
 * zero when b is the mirror image of a conformer like a, as the gauche+ and
 * gauche- forms of butane are. A potential of distances and angles gives
 * both the same energy; a chemist counts them as one shape twice. -1 on no
 * memory. */
double nd_dedup_mirror_rmsd(const nd_dedup *d, const double *a, const double *b);

/* Number of symmetry permutations used, and whether the list is complete. */
int nd_dedup_symmetry_count(const nd_dedup *d, int *complete);

/* Marks duplicates among m structures (x: m * 3n, energy: m). Structures are
 * visited in order of increasing energy; each is compared with the kept
 * ones; keep[i] is set to -1 for kept structures, or to the index of the
 * kept structure it duplicates. Returns the number kept. */
int nd_dedup_mark(const nd_dedup *d, int m, const double *x, const double *energy, int *keep);

#endif
