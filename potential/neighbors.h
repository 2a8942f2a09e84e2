/* Neighbour lists by cell lists (module-internal to potential/).
 *
 * Atoms are binned into cubic cells of edge at least the cutoff, so every
 * neighbour of an atom lies in its own or one of the 26 adjacent cells and
 * the search is linear in the number of atoms. The number of cells is capped
 * near the number of atoms (cells grow for sparse systems), so memory stays
 * linear too. Several structures of the same atoms can be searched at once
 * (a batch); atoms of different structures are never neighbours.
 *
 * Each atom's neighbours come in cell order (cells by z, y, x, atoms
 * ascending within a cell): a fixed order for given coordinates, whatever
 * the thread count, so sums over them are reproducible bit for bit. The
 * lists are symmetric: b is a neighbour of a exactly when a is one of b's
 * (the same r^2 is computed both ways). */
#ifndef ND_NEIGHBORS_H
#define ND_NEIGHBORS_H

#include "core/status.h"

#include <stddef.h>

typedef struct nd_neighbors {
    int natoms;     /* atoms in all structures */
    int maxnn;      /* largest neighbour count of any atom */
    int *start;     /* natoms + 1: neighbours of a are list[start[a] .. start[a+1]-1] */
    int *list;      /* neighbour indices (global, structure * n + atom) */
    size_t cap;     /* allocated length of list */
    /* cell scratch, kept between calls */
    int *cell_of, *cell_start, *cell_atoms;
    void *grid;     /* per structure cell grid */
    int *tmp;       /* natoms x stride slots of the distance pass */
    double *xs;     /* coordinates in cell order */
    size_t cap_tmp;
    int stride;     /* slot size for the next call */
    size_t cap_atoms, cap_cells, cap_structs;
} nd_neighbors;

/* Builds the lists of nstruct structures of n atoms each (x holds
 * nstruct * 3n coordinates) for cutoff rc: pairs with r^2 < rc^2. nb must be
 * zeroed before first use and keeps its memory for the next call.
 * ND_ECOMPUTE if a coordinate is not finite, ND_ENOMEM. */
int nd_neighbors_build(nd_neighbors *nb, int nstruct, int n, const double *x, double rc,
                       nd_error *err);

/* Frees the lists; nb is left zeroed. Accepts NULL. */
void nd_neighbors_free(nd_neighbors *nb);

#endif
