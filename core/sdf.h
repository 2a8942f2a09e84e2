/* MDL molfiles and SD files (internal to core: reached through core/format.h).
 *
 * Layout as in the CTfile formats specification (BIOVIA/Dassault Systemes,
 * "CTfile Formats", the V2000 and V3000 connection tables and the SD file).
 *
 * Read: V2000 (header block, counts line, atom block with mass difference
 * and charge code, bond block, properties block with M  CHG / M  ISO, which
 * replace the atom block's charges / mass differences as the specification
 * says, up to M  END), V3000 (CTAB with COUNTS, ATOM with CHG= and MASS=,
 * BOND), data items "> <name>" whose value runs to the next blank line, and
 * the "$$$$" separator between records. The symbols D and T read as
 * hydrogen with mass number 2 and 3.
 *
 * Stereo: when the record is 3D (the header's "3D" code, or any non-zero z
 * coordinate), each atom with four neighbours (or three, for S, P, Se) whose
 * neighbours all differ by a graph-invariant class gets its chirality sign
 * from the coordinates (see molecule.h). Each double bond outside rings of
 * fewer than 8 atoms whose ends carry distinguishable substituents gets
 * ND_DB_CIS or ND_DB_TRANS from the coordinates (2D or 3D), unless the bond's
 * stereo field says "either" (3). Wedges of 2D drawings are not read:
 * chirality stays 0 there. Atoms whose stereo needs more than a
 * neighbour-class test (cis/trans ring substitution, pseudo-asymmetry) stay 0.
 *
 * Radicals (M  RAD, atom-block charge code 4, V3000 RAD=) set the spin
 * multiplicity: 1 + the number of unpaired electrons (doublet 1, triplet 2,
 * singlet 0), assuming high spin; where they sit is not kept, so they are
 * not written back. Other properties (S-groups, aliases) are read over and
 * not carried; header lines 2 and 3 (program and comment) are not carried.
 *
 * Write: V2000. Coordinates in the fixed 10.4 columns, so a round trip keeps
 * them to 0.00005 angstrom (half a unit in the fourth decimal). Charges go
 * both in the atom block (charge codes for -3..+3) and in M  CHG lines;
 * isotopes in M  ISO lines (mass difference 0 in the atom block). The
 * program line carries "nadir" and the 2D/3D code but no timestamp, so the
 * output is the same for the same input. Atom parities and wedges are not
 * written (0): 3D coordinates carry the configuration. Line breaks in a
 * title are written as spaces. */
#ifndef ND_SDF_H
#define ND_SDF_H

#include "core/lineio.h"
#include "core/molecule.h"

#include <stdio.h>

/* Largest atom or bond count accepted in a V3000 record. */
#define ND_SDF_MAX_ATOMS 1000000

/* Reads the next record from l into mol (cleared first). Increments
 * l->record for each record begun. Returns ND_OK, ND_END when only blank
 * lines are left, or ND_EINPUT naming the file, record and line; after
 * ND_EINPUT the source has been moved past the record's "$$$$", so reading
 * may go on. ND_ENOMEM and ND_EIO are final. */
int nd_sdf_read(nd_lines *l, nd_molecule *mol, nd_error *err);

/* Writes mol as one V2000 record followed by "$$$$". ND_EINPUT when mol
 * cannot be held by V2000 (a title that is "$$$$", more than 999 atoms or bonds, a coordinate
 * outside the 10.4 columns, a data item value with an empty line or a
 * "$$$$" line, a charge outside -15..15); ND_EIO on a write error. */
int nd_sdf_write(FILE *f, const nd_molecule *mol, nd_error *err);

#endif
