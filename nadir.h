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
#include "core/numeric.h"
#include "core/elements.h"
#include "core/molecule.h"
#include "core/rng.h"
#include "core/energy.h"
#include "core/format.h"
#include "core/smiles.h"
#include "core/report.h"
#include "core/progress.h"

/* potential */
#include "potential/descriptor.h"
#include "potential/descriptor_json.h"
#include "potential/model.h"
#include "potential/potential.h"
#include "potential/ensemble.h"
#include "potential/dataset.h"
#include "potential/external.h"
#include "potential/train.h"
#include "potential/evaluate.h"

/* optimize */
#include "optimize/converge.h"
#include "optimize/precondition.h"
#include "optimize/minimize.h"
#include "optimize/restrain.h"
#include "optimize/torsion_turn.h"
#include "optimize/hessian.h"
#include "optimize/modes.h"
#include "optimize/symmetry.h"
#include "optimize/thermo.h"
#include "optimize/repair.h"

/* conformers */
#include "conformers/topology.h"
#include "conformers/rmsd.h"
#include "conformers/automorph.h"
#include "conformers/dedup.h"
#include "conformers/rank.h"
#include "conformers/embed.h"
#include "conformers/verify.h"
#include "conformers/sample.h"
#include "conformers/search.h"

#endif
