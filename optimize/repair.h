/* Imaginary-mode repair: turn a saddle point (or a structure with real
 * imaginary modes) into a minimum by displacing along those modes and
 * minimising again, then checking again. */
#ifndef ND_REPAIR_H
#define ND_REPAIR_H

#include "core/energy.h"
#include "core/molecule.h"
#include "core/status.h"
#include "optimize/minimize.h"
#include "optimize/modes.h"

#define ND_REPAIR_ROUNDS 4        /* rounds of displace + minimise + check */
#define ND_REPAIR_MAX_MODES 4     /* imaginary modes tried per round (most negative first) */
/* Displacement along a mode: the norm of the Cartesian displacement vector,
 * angstrom. At least ND_REPAIR_STEP (0.1, a few degrees of a torsion, a
 * small fraction of a bond), and large enough that the gradient it creates
 * along the mode, |k| * s for force constant k, is ten times the
 * minimiser's force tolerance, so the minimiser does not stop at once on a
 * flat saddle; at most ND_REPAIR_STEP_MAX (0.5) (common practice, no
 * source, for the magnitudes). */
#define ND_REPAIR_STEP 0.1
#define ND_REPAIR_STEP_MAX 0.5

typedef struct nd_repair_opts {
    int max_rounds;                   /* 0 = ND_REPAIR_ROUNDS */
    int max_modes;                    /* 0 = ND_REPAIR_MAX_MODES */
    double step;                      /* angstrom; 0 = ND_REPAIR_STEP */
    double step_max;                  /* angstrom; 0 = ND_REPAIR_STEP_MAX */
    const nd_minimizer_type *method;  /* NULL = L-BFGS */
    const nd_minimize_options *min;   /* NULL = defaults with the modes convergence preset */
    const nd_hessian_opts *hessian;   /* NULL = defaults */
    const nd_modes_opts *modes;       /* NULL = defaults */
    const nd_check_opts *check;       /* NULL = defaults */
} nd_repair_opts;

/* What was done. */
typedef struct nd_repair_result {
    int rounds;          /* rounds of displacement done (0 if the start was a minimum) */
    int nimag_start;     /* real imaginary modes at the start */
    int nimag_end;       /* ... at the end */
    int trials;          /* displaced structures minimised */
    int unconverged;     /* of those, minimisations that hit their step limit or stalled */
    int force_calls;     /* gradient evaluations spent in minimisations */
    int hessians;        /* Hessians computed (rounds + 1) */
    double energy_start; /* kcal/mol */
    double energy_end;   /* kcal/mol */
    double lowest_start; /* lowest frequency at the start, cm^-1 */
    int repaired;        /* 1 if the end is a minimum (verdict ND_VERDICT_MINIMUM) */
} nd_repair_result;

/* Checks mol under pot and repairs it when needed.
 *
 * Each round: the normal modes are computed (nd_modes_analyse); if there is
 * no real imaginary mode, stop. Otherwise for each of the (up to max_modes)
 * real imaginary modes, most negative first, the structure is displaced by
 * +s and -s along the mode's Cartesian vector (s as ND_REPAIR_STEP says)
 * and minimised; of these 2 x modes trials the lowest-energy end point
 * becomes the new structure. Trials run one after the other in a fixed
 * order and ties keep the first, so the result is deterministic. Frozen
 * atoms (frozen[i] != 0; may be NULL) stay in place in the minimisations
 * (through restrain.h) and the analysis uses the partial Hessian.
 *
 * mol->xyz is overwritten with the final structure. modes and check (may
 * be NULL) receive the final analysis (free modes with nd_modes_free);
 * res (may be NULL) says what was done. A structure still not a minimum
 * after max_rounds is not an error: ND_OK with res->repaired = 0. Errors of
 * the potential, the Hessian or the minimiser are returned as they come. */
int nd_repair_run(const nd_energy *pot, nd_molecule *mol, const int *frozen,
                  const nd_repair_opts *opts, nd_modes *modes, nd_check *check,
                  nd_repair_result *res, nd_error *err);

#endif
