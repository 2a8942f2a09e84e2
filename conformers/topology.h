/* Topology of a molecule from its bond table: neighbour lists, connected
 * parts, ring bonds, the smallest set of smallest rings (SSSR), flat
 * (conjugated, planar) rings, hybridisation, rotatable bonds and
 * stereocentres. Built once per molecule and shared by the embedding and
 * the conformer search. */
#ifndef ND_TOPOLOGY_H
#define ND_TOPOLOGY_H

#include "core/molecule.h"

/* Hybridisation as the geometry needs it: the ideal angle at the atom. */
enum {
    ND_HYB_NONE = 0, /* fewer than two neighbours: no angle */
    ND_HYB_SP = 1,   /* linear, 180 degrees */
    ND_HYB_SP2 = 2,  /* trigonal planar, 120 degrees (also conjugated N, O and flat-ring atoms) */
    ND_HYB_SP3 = 3   /* tetrahedral, 109.47 degrees */
};

/* Plain data; free with nd_topology_free. All arrays are owned. */
typedef struct nd_topology {
    int natoms, nbonds;
    int *start;         /* natoms + 1: neighbours of i are nbr[start[i] .. start[i+1]-1] */
    int *nbr;           /* neighbour atoms, ascending for each atom */
    int *nbr_bond;      /* bond index of each nbr entry */
    int *hyb;           /* per atom, ND_HYB_* */
    int *component;     /* per atom: index of its connected part, 0-based, in atom order */
    int ncomponents;
    int *bond_in_ring;  /* per bond: 1 if the bond lies on a cycle */
    int nrings;         /* size of the SSSR: nbonds - natoms + ncomponents */
    int *ring_start;    /* nrings + 1 */
    int *ring_atoms;    /* atoms of ring r in cyclic order: ring_atoms[ring_start[r] .. ] */
    int *ring_flat;     /* per ring: 1 if planar (size 3-7, every atom sp2, sp or a
                           lone-pair donor next to them: aromatic and similar rings) */
    int *atom_rings;    /* per atom: number of SSSR rings containing it */
    int *bond_rings;    /* per bond: number of SSSR rings containing it */
    int *atom_flat;     /* per atom: 1 if in a flat ring */
    int *bond_flat;     /* per bond: index of a flat ring containing it, or -1 */
} nd_topology;

/* Builds the topology of m (which must have a bond table; atoms without
 * bonds are single-atom parts). Returns ND_OK, ND_ENOMEM, or ND_EINPUT if a
 * bond index is out of range. Free t with nd_topology_free even on error. */
int nd_topology_build(const nd_molecule *m, nd_topology *t, nd_error *err);

/* Frees the arrays of t and zeroes it; accepts NULL. */
void nd_topology_free(nd_topology *t);

/* Index of the bond between atoms a and b, or -1. */
int nd_topology_bond(const nd_topology *t, int a, int b);

/* Degree of atom i. */
int nd_topology_degree(const nd_topology *t, int i);

/* Size of the smallest SSSR ring that contains atoms a, b, c consecutively
 * (b in the middle), or 0 when there is none. */
int nd_topology_angle_ring(const nd_topology *t, int a, int b, int c);

/* Size of the smallest SSSR ring containing bond b, or 0. */
int nd_topology_bond_ring(const nd_topology *t, int b);

/* 1 if ring r contains atom i. */
int nd_topology_ring_has(const nd_topology *t, int r, int i);

/* 1 if bond b is rotatable: a single bond outside rings whose two atoms
 * each have another neighbour that is not hydrogen, neither atom linear
 * (sp). Amide and ester C-X bonds count (their barrier is a matter for the
 * potential, not the topology). */
int nd_topology_is_rotatable(const nd_topology *t, const nd_molecule *m, int b);

/* Number of rotatable bonds; their indices go to out (nbonds entries) when
 * out is not NULL. */
int nd_topology_rotatable_bonds(const nd_topology *t, const nd_molecule *m, int *out);

/* Stereocentres the molecule states: atoms with chirality set (written to
 * atoms) and double bonds with a configuration (to bonds). Either output
 * may be NULL; counts go to *natoms_out and *nbonds_out. */
void nd_topology_stereo(const nd_molecule *m, int *atoms, int *natoms_out, int *bonds,
                        int *nbonds_out);

#endif
