/* XYZ files (internal to core: reached through core/format.h).
 *
 * A frame is: a line with the atom count (a positive integer alone on its
 * line), a comment line (the molecule's title), then one line per atom:
 * an element symbol in any letter case or an atomic number, then x y z in
 * angstrom; further columns (charges, forces, velocities) are ignored.
 * A file holds one or more frames; blank lines between frames are skipped. */
#ifndef ND_XYZ_H
#define ND_XYZ_H

#include "core/lineio.h"
#include "core/molecule.h"

#include <stdio.h>

/* Largest atom count accepted in a frame (a guard against absurd counts). */
#define ND_XYZ_MAX_ATOMS 1000000

/* Reads the next frame from l into mol (cleared first; dimension 3, no
 * bonds, charge 0). Increments l->record for each frame begun. Returns
 * ND_OK, ND_END when no frame is left, or ND_EINPUT naming the file, frame
 * and line; after ND_EINPUT the source is positioned at the start of the
 * next plausible frame, so reading may go on. ND_ENOMEM/ND_EIO are final. */
int nd_xyz_read(nd_lines *l, nd_molecule *mol, nd_error *err);

/* Writes mol as one frame to f. The title goes on the comment line (line
 * breaks become spaces); coordinates are printed with six decimals when
 * that reads back to the same double, else with the fewest significant
 * digits (15 to 17) that do, so a round trip is exact. ND_EINPUT if mol has no coordinates (dimension 0) and at
 * least one atom, or an atom outside the elements table; ND_EIO on a write
 * error. */
int nd_xyz_write(FILE *f, const nd_molecule *mol, nd_error *err);

/* Formats v as "%.6f" if strtod reads that back to exactly v (and v is not
 * -0), else with the fewest significant digits (15, 16 or 17) that do;
 * buf needs 32 bytes. Returns buf. */
char *nd_xyz_format_double(double v, char *buf);

#endif
