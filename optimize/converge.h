/* Convergence tests for the minimisers: largest atomic force, RMS force and
 * energy change, with two presets (conformer ranking, and the tighter one
 * used before a normal-mode analysis). The test is separate from the
 * iteration so the caller's loop decides when to stop (see minimize.h). */
#ifndef ND_CONVERGE_H
#define ND_CONVERGE_H

/* Why a run stopped. Only ND_STOP_FORCE and ND_STOP_ENERGY mean a minimum
 * was reached; a run that hit its step limit or stalled is not converged. */
typedef enum nd_stop {
    ND_STOP_NONE = 0,   /* still running (or stopped by an error) */
    ND_STOP_FORCE = 1,  /* largest atomic force and RMS force below their tolerances */
    ND_STOP_ENERGY = 2, /* energy change below its tolerance, forces below the loose cap */
    ND_STOP_STEPS = 3,  /* the step limit was reached: NOT converged */
    ND_STOP_STALLED = 4 /* no lower energy could be found along any direction: NOT converged */
} nd_stop;

/* Tolerances. A criterion with tolerance 0 (or max_steps 0) is never met
 * (max_steps 0 means no limit). Units: kcal/mol/angstrom, kcal/mol. */
typedef struct nd_converge {
    double max_force;        /* largest atomic force |g_i| (norm of the atom's 3 components) */
    double rms_force;        /* sqrt(sum over the 3n components of g^2 / 3n) */
    double energy_change;    /* |E_k - E_{k-1}| between two accepted points */
    double energy_max_force; /* the energy criterion also needs the largest force below this */
    int max_steps;           /* iterations before giving up (0: no limit) */
} nd_converge;

/* Preset for conformer ranking: max force 0.1, RMS 0.05 kcal/mol/A, energy
 * change 1e-6 kcal/mol with forces below 0.5, 2000 steps. See converge.c for
 * why these numbers. */
void nd_converge_preset_ranking(nd_converge *c);

/* Tighter preset before a finite-difference normal-mode analysis: max force
 * 0.01, RMS 0.005 kcal/mol/A, energy change 1e-8 kcal/mol with forces below
 * 0.05, 5000 steps. */
void nd_converge_preset_modes(nd_converge *c);

/* Largest atomic force: max over atoms of the norm of (g_3i, g_3i+1, g_3i+2).
 * 0 for n = 0. */
double nd_converge_max_force(int n, const double *g);

/* RMS force over the 3n gradient components; 0 for n = 0. */
double nd_converge_rms_force(int n, const double *g);

/* Tests the gradient g of n atoms and the last energy change de (pass a
 * negative de when there is no previous point yet, e.g. before the first
 * step). Returns ND_OK with *why set to ND_STOP_FORCE or ND_STOP_ENERGY when
 * a criterion is met, ND_CONTINUE (why = ND_STOP_NONE) otherwise. The force
 * criterion is tested first. The step limit is the caller's loop to check. */
int nd_converge_test(const nd_converge *c, int n, const double *g, double de, nd_stop *why);

/* Short fixed name of a stop reason: "force", "energy change", "step limit",
 * "stalled", "none". Never NULL. */
const char *nd_stop_name(nd_stop why);

#endif
