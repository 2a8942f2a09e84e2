/* Checking that a relaxed structure is still the molecule it started as:
 * the same bonds (perceived from the coordinates and compared with the bond
 * table), the same configuration at every stereocentre and tetrahedral
 * atom, and the same configuration of every double bond outside rings.
 * Also bond perception from coordinates, for inputs without a bond table. */
#ifndef ND_VERIFY_H
#define ND_VERIFY_H

#include "core/molecule.h"

/* Tolerances of the bond test, angstrom, added to the sum of the two
 * covalent radii (Cordero et al. 2008, core/elements.h). A bond of the
 * table is broken when it is longer than r_a + r_b + ND_VERIFY_BROKEN; a
 * new bond has formed when two atoms not bonded in the table come closer
 * than r_a + r_b + ND_VERIFY_FORMED. Perception uses ND_VERIFY_PERCEIVE.
 * (Covalent radii plus about 0.4 angstrom is the usual perception rule:
 * common practice, no source; the tighter "formed" margin keeps crowded
 * but unbonded contacts, such as hydrogen bonds, from counting.) */
#define ND_VERIFY_BROKEN 0.45
#define ND_VERIFY_FORMED 0.10
#define ND_VERIFY_PERCEIVE 0.40

/* What a check found: the first problem, in this order of tests. */
typedef enum nd_verify_verdict {
    ND_VERIFY_OK = 0,          /* same molecule */
    ND_VERIFY_BONDING = 1,     /* a bond broke or formed */
    ND_VERIFY_STEREO = 2,      /* a stereocentre or tetrahedral atom was inverted */
    ND_VERIFY_DOUBLE_BOND = 3  /* a double bond changed between cis and trans */
} nd_verify_verdict;

/* A checker for one molecule. Free with nd_verify_free. */
typedef struct nd_verify nd_verify;

/* Prepares a checker for m (needs its bond table).
 *
 * Which configurations are kept: every atom with m->chirality set keeps
 * that sign (the signed-volume convention of molecule.h); every other atom
 * with exactly four neighbours keeps the sign it has in ref (3n reference
 * coordinates, e.g. the first embedded structure; NULL: only the stated
 * ones are checked), since a tetrahedral centre that turns inside out has
 * gone through a flat, broken structure even when it is no stereocentre.
 * Double bonds outside rings with a neighbour on each end keep
 * m->bonds[b].config when set, else the configuration in ref.
 * *out is malloc'd; ND_EINPUT without a bond table, ND_ENOMEM. */
int nd_verify_new(const nd_molecule *m, const double *ref, nd_verify **out, nd_error *err);

/* Frees v; accepts NULL. */
void nd_verify_free(nd_verify *v);

/* Checks structure x (3n). Returns the verdict; *atom (may be NULL)
 * receives the first offending atom (0-based) or -1. */
nd_verify_verdict nd_verify_check(const nd_verify *v, const double *x, int *atom);

/* Number of tetrahedral configurations and double bonds that are checked. */
int nd_verify_centres(const nd_verify *v);
int nd_verify_double_bonds(const nd_verify *v);

/* Short fixed name of a verdict ("bonding changed"); never NULL. */
const char *nd_verify_name(nd_verify_verdict v);

/* Signed volume (n1 - c) . ((n2 - c) x (n3 - c)) of atoms at x, cubic
 * angstrom: the chirality convention of molecule.h. */
double nd_verify_signed_volume(const double *x, int c, int n1, int n2, int n3);

/* Configuration of double bond b of m at x: ND_DB_CIS or ND_DB_TRANS for
 * the lowest-index neighbour of each end (molecule.h), ND_DB_NONE when an
 * end has no other neighbour. */
int nd_verify_double_bond_config(const nd_molecule *m, int b, const double *x);

/* Perceives a bond table for m from its coordinates: atoms closer than
 * r_a + r_b + ND_VERIFY_PERCEIVE are bonded, all bonds single (no bond
 * orders are guessed; rotors next to multiple bonds are then sampled as
 * single bonds). Replaces any existing bonds and sets has_bonds. ND_EINPUT
 * for an element without a covalent radius, ND_ENOMEM. */
int nd_verify_perceive_bonds(nd_molecule *m, nd_error *err);

#endif
