/* Local minimisation of an nd_energy: one interface, several methods.
 *
 * Methods (L-BFGS, FIRE) sit behind a small type table, so a new method is
 * one file and one table entry and the CLI picks one by name. A run has three
 * parts, as in the GNU Scientific Library's minimisers:
 *
 *   nd_minimizer_new      set-up: evaluates energy and gradient at the start
 *   nd_minimizer_iterate  one step (one or more force calls)
 *   nd_minimizer_test     the convergence test (converge.h)
 *
 * and the caller's loop decides what to log and when to stop:
 *
 *   nd_minimizer *m;
 *   if (nd_minimizer_new(&m, nd_minimizer_find("lbfgs"), &pot, n, x0, &opt, &err)) ...
 *   nd_stop why;
 *   while (nd_minimizer_test(m, &why) == ND_CONTINUE && nd_minimizer_steps(m) < limit)
 *       if ((s = nd_minimizer_iterate(m, &err)) != ND_OK) break;
 *   ... nd_minimizer_x(m), nd_minimizer_energy(m) ...
 *   nd_minimizer_free(m);
 *
 * nd_minimize() is that loop for callers who only want the end point.
 * Solvers never print; every figure a caller may want to log is readable
 * from the handle after each step. The potential is only ever reached
 * through nd_energy (core/energy.h). Frozen atoms and restraints are
 * applied by wrapping the potential (restrain.h); a frozen atom has an
 * exactly zero gradient, and both methods then leave it exactly in place. */
#ifndef ND_MINIMIZE_H
#define ND_MINIMIZE_H

#include <stddef.h>

#include "core/energy.h"
#include "core/status.h"
#include "optimize/converge.h"
#include "optimize/precondition.h"

/* Options of a run. Fill with nd_minimize_options_default, then change
 * fields. Pointers are borrowed for the life of the minimiser. */
typedef struct nd_minimize_options {
    nd_converge stop;          /* convergence tolerances and step limit (ranking preset) */
    double max_step;           /* largest displacement of any atom in one step, angstrom (0.2) */
    int memory;                /* L-BFGS: correction pairs kept (10) */
    double wolfe_c1;           /* L-BFGS: sufficient-decrease constant of the Armijo condition (1e-4) */
    double wolfe_c2;           /* L-BFGS: curvature constant of the strong Wolfe condition (0.9) */
    int max_line_calls;        /* L-BFGS: force calls allowed in one line search (20) */
    nd_precond *precond;       /* L-BFGS: model Hessian for the initial inverse Hessian, or NULL;
                                  borrowed, rebuilt by the run as atoms move (one per concurrent run) */
    double precond_refresh;    /* L-BFGS: rebuild the model when an atom moved this far, angstrom (0.05) */
    double fire_dt;            /* FIRE: initial time step (0.05, unit masses; see fire.c) */
    double fire_dt_max;        /* FIRE: largest time step (10 * fire_dt, Bitzek et al. 2006) */
} nd_minimize_options;

/* Sets *o to the defaults shown above (ranking convergence preset). */
void nd_minimize_options_default(nd_minimize_options *o);

/* One method. `state_size` bytes are allocated (zeroed) by nd_minimizer_new
 * and handed to the three functions:
 *   init     allocates the method's working arrays for n atoms; x, energy
 *            and g are the evaluated starting point;
 *   iterate  takes one step from (x, energy, g), overwriting them with the
 *            new accepted point; calls the potential only through pot;
 *            returns ND_OK, or an error (ND_ECOMPUTE when no lower energy
 *            can be found, with a message);
 *   free     frees what init allocated (also after a failed init). */
typedef struct nd_minimizer_type {
    const char *name;
    size_t state_size;
    int (*init)(void *state, int n, const double *x, double energy, const double *g,
                const nd_minimize_options *opt, nd_error *err);
    int (*iterate)(void *state, const nd_energy *pot, int n, double *x, double *energy, double *g,
                   nd_error *err);
    void (*free)(void *state);
} nd_minimizer_type;

extern const nd_minimizer_type nd_minimizer_lbfgs; /* "lbfgs": L-BFGS with a strong Wolfe line search */
extern const nd_minimizer_type nd_minimizer_fire;  /* "fire": FIRE (Bitzek et al., PRL 97, 170201, 2006) */

/* The method called name ("lbfgs", "fire"), or NULL if there is none. */
const nd_minimizer_type *nd_minimizer_find(const char *name);

/* The i-th method of the table (0-based), NULL past the end: for listing. */
const nd_minimizer_type *nd_minimizer_type_at(int i);

typedef struct nd_minimizer nd_minimizer;

/* Starts a run of method type on n >= 1 atoms from x0 (3n, copied).
 * Evaluates the energy and gradient at x0 (one force call). opt may be NULL
 * for the defaults; it is copied, but opt->precond is borrowed (and
 * rebuilt at the start point). Returns
 * ND_OK and *out (free with nd_minimizer_free); ND_EINVAL for bad
 * arguments, ND_ENOMEM, or ND_ECOMPUTE when the potential fails or returns
 * non-finite values at x0. */
int nd_minimizer_new(nd_minimizer **out, const nd_minimizer_type *type, const nd_energy *pot, int n,
                     const double *x0, const nd_minimize_options *opt, nd_error *err);

/* Takes one step. Returns ND_OK, or ND_ECOMPUTE when the potential failed
 * or returned non-finite values (the message names the step, 1-based, and
 * the atom; an error code of the potential other than ND_ECOMPUTE, such as
 * ND_EDOMAIN, is passed through)
 * or the method stalled (nd_minimizer_stalled is then 1). After an error
 * the handle keeps the last accepted point. */
int nd_minimizer_iterate(nd_minimizer *m, nd_error *err);

/* Convergence test of the current point against opt->stop: ND_OK with *why
 * (ND_STOP_FORCE or ND_STOP_ENERGY) when converged, otherwise ND_CONTINUE.
 * Does not look at the step limit (the caller's loop does). */
int nd_minimizer_test(const nd_minimizer *m, nd_stop *why);

/* Current (last accepted) point, owned by m, valid until the next iterate. */
const double *nd_minimizer_x(const nd_minimizer *m);
const double *nd_minimizer_gradient(const nd_minimizer *m);
double nd_minimizer_energy(const nd_minimizer *m);
/* Energy change of the last step (0 before the first step). */
double nd_minimizer_energy_change(const nd_minimizer *m);
int nd_minimizer_steps(const nd_minimizer *m);       /* iterations taken */
int nd_minimizer_force_calls(const nd_minimizer *m); /* energy+gradient evaluations, start included */
int nd_minimizer_stalled(const nd_minimizer *m);     /* 1 after a stall error */
const char *nd_minimizer_name(const nd_minimizer *m);

/* Frees m; accepts NULL. */
void nd_minimizer_free(nd_minimizer *m);

/* What a whole run gave. */
typedef struct nd_minimize_result {
    int converged;        /* 1 only when a convergence criterion was met */
    nd_stop why;          /* which criterion stopped the run, or STEPS / STALLED */
    int steps;            /* iterations taken */
    int force_calls;      /* energy+gradient evaluations, the start included */
    double energy;        /* energy at the returned point, kcal/mol */
    double max_force;     /* largest atomic force there, kcal/mol/A */
    double rms_force;     /* RMS force there, kcal/mol/A */
    double energy_change; /* energy change of the last step, kcal/mol */
} nd_minimize_result;

/* Minimises from x (3n, overwritten with the last accepted point) with
 * method type (NULL: L-BFGS) and options opt (NULL: defaults); res may be
 * NULL. Returns ND_OK when converged; ND_CONTINUE when not converged (step
 * limit or stall: res->why says which, x holds the last accepted point, the
 * lowest for L-BFGS, and err says why); or an error (ND_EINVAL, ND_ENOMEM, ND_ECOMPUTE for a
 * failed or non-finite potential), in which case x holds the last accepted
 * point. */
int nd_minimize(const nd_minimizer_type *type, const nd_energy *pot, int n, double *x,
                const nd_minimize_options *opt, nd_minimize_result *res, nd_error *err);

#endif
