/* nadir: relaxed, ranked, verified conformers from a learned potential.
 * The library's public API, all of it: the command-line program uses only
 * this header, as any embedding program would. Link with libnadir.a,
 * OpenBLAS, LAPACKE, cJSON, libm and OpenMP. */
#ifndef NADIR_H
#define NADIR_H

#define ND_VERSION "0.1.0"

/* core */
#include "core/status.h"
#include "core/units.h"
#include "core/elements.h"
#include "core/molecule.h"
#include "core/rng.h"
#include "core/energy.h"
#include "core/format.h"

/* potential */

/* optimize */

/* conformers */

#endif
