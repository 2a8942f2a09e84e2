/* The molecule model carried through every part of nadir. */
#ifndef ND_MOLECULE_H
#define ND_MOLECULE_H

#include "core/status.h"

/* Bond orders. Aromatic bonds appear only transiently (SMILES input, SD
 * query files); every stored molecule is kekulised unless noted. */
enum { ND_BOND_SINGLE = 1, ND_BOND_DOUBLE = 2, ND_BOND_TRIPLE = 3, ND_BOND_AROMATIC = 4 };

/* Double-bond configuration, stated for the lowest-index neighbour of each
 * end (neighbours other than the partner atom of the double bond). */
enum { ND_DB_NONE = 0, ND_DB_CIS = 1, ND_DB_TRANS = 2 };

typedef struct nd_bond {
    int a, b;     /* atom indices, 0-based, a != b */
    int order;    /* ND_BOND_* */
    int config;   /* ND_DB_*: double-bond configuration, or ND_DB_NONE */
} nd_bond;

typedef struct nd_data_item {
    char *name;   /* owned */
    char *value;  /* owned; may hold newlines */
} nd_data_item;

/* A molecule: plain data. Arrays have natoms (or nbonds, ndata) entries.
 *
 * chirality[i] is 0 (none/unspecified) or +1/-1: the sign of the signed
 * volume (n1 - c) . ((n2 - c) x (n3 - c)) where c is atom i and n1 < n2 < n3
 * are its three lowest-index neighbours in the bond table. The definition
 * needs no coordinates, so SMILES input, embedding and checks share it.
 *
 * Free with nd_molecule_free; a zero-initialised struct is a valid empty
 * molecule. */
typedef struct nd_molecule {
    int natoms;
    int *z;             /* atomic numbers */
    double *xyz;        /* 3 * natoms coordinates, angstrom */
    int *formal_charge; /* per atom */
    int *isotope;       /* mass number, 0 = natural abundance */
    int *chirality;     /* per atom, see above */
    int nbonds;
    nd_bond *bonds;     /* empty when the input had no bond table */
    int has_bonds;      /* 1 if the bond table came with the input or was perceived */
    int charge;         /* total charge */
    int multiplicity;   /* spin multiplicity, 1 = closed-shell singlet */
    int dimension;      /* 3 for 3D coordinates, 2 for a 2D drawing, 0 for none */
    char *title;        /* owned, may be NULL */
    int ndata;
    nd_data_item *data; /* named data items, in input order */
    int cap_atoms, cap_bonds, cap_data; /* allocated sizes; internal */
} nd_molecule;

/* Sets *m to an empty molecule (multiplicity 1). Does not free. */
void nd_molecule_init(nd_molecule *m);

/* Frees every heap part of m and leaves it empty and reusable. Accepts NULL. */
void nd_molecule_free(nd_molecule *m);

/* Removes atoms, bonds, data and title but keeps the allocations. */
void nd_molecule_clear(nd_molecule *m);

/* Appends an atom of atomic number z at (x, y, z). Returns ND_OK or ND_ENOMEM. */
int nd_molecule_add_atom(nd_molecule *m, int z, double x, double y, double zc, nd_error *err);

/* Appends a bond. Checks indices and order; ND_EINPUT with a message otherwise. */
int nd_molecule_add_bond(nd_molecule *m, int a, int b, int order, nd_error *err);

/* Sets the title (copied). NULL clears it. */
int nd_molecule_set_title(nd_molecule *m, const char *title, nd_error *err);

/* Sets data item name to value (both copied); replaces an existing item of
 * that name in place, so input order is kept. */
int nd_molecule_set_data(nd_molecule *m, const char *name, const char *value, nd_error *err);

/* Value of the data item called name, or NULL. Owned by m. */
const char *nd_molecule_get_data(const nd_molecule *m, const char *name);

/* Deep copy of src into dst (dst is freed first; dst may be uninitialised
 * only if zeroed). Returns ND_OK or ND_ENOMEM. */
int nd_molecule_copy(nd_molecule *dst, const nd_molecule *src, nd_error *err);

/* Molar mass in g/mol from the standard atomic weights (isotope labels
 * honoured). */
double nd_molecule_mass(const nd_molecule *m);

/* Hill-order formula ("C6H6O", "ClH"): C then H then the others
 * alphabetically; without carbon, all alphabetically. Writes at most size
 * bytes including the NUL; returns the length it needed. */
int nd_molecule_formula(const nd_molecule *m, char *buf, int size);

/* Sum of formal charges. */
int nd_molecule_formal_charge_sum(const nd_molecule *m);

/* Electrons of the molecule at total charge `charge`: the sum of its atomic
 * numbers minus the charge (odd: a radical, or an ion whose charge is not
 * stated). */
long nd_molecule_electrons(const nd_molecule *m, int charge);

/* Checks atomic numbers, finite coordinates and bond indices; ND_EINPUT
 * naming the first bad atom or bond. */
int nd_molecule_validate(const nd_molecule *m, nd_error *err);

/* Neighbour lists from the bond table, in CSR form: neighbours of atom i are
 * adj[start[i] .. start[i+1]-1], sorted ascending. Both arrays are malloc'd
 * and owned by the caller (free both). ND_ENOMEM on failure. */
int nd_molecule_neighbours(const nd_molecule *m, int **start, int **adj, nd_error *err);

#endif
