/* SMILES: reading one SMILES string into a molecule and writing one back.
 *
 * The reader follows the OpenSMILES specification: organic-subset and
 * bracket atoms (isotope, element, tetrahedral chirality @/@@, hydrogen
 * count, charge, atom class), bonds - = # : / \, branches, ring closures
 * (digits and %nn, with bond orders), dot-disconnected parts, aromatic
 * lowercase atoms (kekulised by a maximum matching), and implicit
 * hydrogens from the normal valences. Every hydrogen becomes an explicit
 * atom of the molecule. Refused with an error naming the column: the
 * quadruple bond $ (the molecule has no such order), the wildcard *, the
 * chirality classes @AL, @SP, @TB and @OH, elements past Xe. */
#ifndef ND_SMILES_H
#define ND_SMILES_H

#include "core/molecule.h"

/* Parses smiles (NUL-terminated; parsing stops at the first whitespace, so
 * "CCO ethanol" reads "CCO") into mol, which is cleared first.
 *
 * On success mol holds: the atoms in the order written, followed by the
 * hydrogens added for implicit and bracket H counts (the hydrogens of each
 * atom follow one another, in atom order); bonds kekulised (no aromatic
 * orders); formal charges and their sum in mol->charge; isotopes; chirality
 * in the signed-volume convention of molecule.h; double-bond config from
 * / and \; mol->dimension 0 and all coordinates zero; has_bonds 1.
 *
 * Errors (ND_EINPUT) name the 1-based column and what was wrong: "SMILES
 * column 12: ring bond 3 never closed". mol is left cleared on error. */
int nd_smiles_parse(const char *smiles, nd_molecule *mol, nd_error *err);

/* Writes mol as a SMILES string with explicit-H atoms folded into their
 * heavy atom's bracket or implicit count, charges, isotopes, tetrahedral
 * chirality and double-bond configuration where set. Bonds are written in
 * Kekule form (no aromatic lowercase); a molecule with aromatic bond
 * orders is refused (ND_EINPUT). Not canonical: a depth-first walk from
 * the lowest-index atom of each part, neighbours in index order. *out is
 * malloc'd; the caller frees it (NULL on error). Reading the result back
 * gives the same graph (elements, charges, isotopes, bonds, stereo). */
int nd_smiles_write(const nd_molecule *mol, char **out, nd_error *err);

/* Same as nd_smiles_write, and when order is not NULL (natoms entries)
 * it receives for each atom of mol its index in the molecule that
 * nd_smiles_parse makes of the string, so callers can match atoms after a
 * round trip. */
int nd_smiles_write_mapped(const nd_molecule *mol, char **out, int *order, nd_error *err);

#endif
