/* Convergence tests and presets (see converge.h).
 *
 * Why the preset numbers (common practice, no source, for the magnitudes):
 * a residual force f along a mode of curvature k leaves the energy off the
 * minimum by about f^2 / (2k). Soft torsional modes of drug-like molecules
 * have k of order 1 kcal/mol/A^2, so f = 0.1 kcal/mol/A keeps the ranking
 * error near 0.005 kcal/mol, far below the 0.1-1 kcal/mol gaps that decide
 * Boltzmann weights. (0.1 kcal/mol/A is 8.4e-5 hartree/bohr, tighter than
 * the largest-force thresholds common in quantum-chemistry defaults, from
 * memory ~4.5e-4 hartree/bohr, which a cheap potential can afford.)
 * A finite-difference Hessian at a point with residual force f shifts the
 * lowest frequencies; ten times tighter forces (0.01 kcal/mol/A) keep the
 * shifts of modes above ~20 cm^-1 small enough that a real minimum is not
 * flagged as having an imaginary mode. The energy criterion guards against
 * numerically flat ends (the energy no longer changes in double precision
 * while the force criterion is just out of reach); it needs the forces to be
 * under a loose cap (5x the force tolerance) so a plateau far from a
 * minimum is never taken for one. */
#include "optimize/converge.h"

#include "core/status.h"

#include <math.h>

void nd_converge_preset_ranking(nd_converge *c)
{
    c->max_force = 0.1;
    c->rms_force = 0.05;
    c->energy_change = 1e-6;
    c->energy_max_force = 0.5;
    c->max_steps = 2000;
}

void nd_converge_preset_modes(nd_converge *c)
{
    c->max_force = 0.01;
    c->rms_force = 0.005;
    c->energy_change = 1e-8;
    c->energy_max_force = 0.05;
    c->max_steps = 5000;
}

double nd_converge_max_force(int n, const double *g)
{
    double m = 0;
    for (int i = 0; i < n; i++) {
        const double *a = g + 3 * i;
        double f2 = a[0] * a[0] + a[1] * a[1] + a[2] * a[2];
        if (f2 > m || f2 != f2)
            m = f2;
    }
    return sqrt(m);
}

double nd_converge_rms_force(int n, const double *g)
{
    if (n <= 0)
        return 0;
    double s = 0;
    for (int i = 0; i < 3 * n; i++)
        s += g[i] * g[i];
    return sqrt(s / (3.0 * n));
}

/* The force criterion needs both the largest and the RMS force under their
 * tolerances; the energy criterion needs a previous point (de >= 0), the
 * change under its tolerance and the largest force under the loose cap.
 * Non-finite forces never pass (comparisons with NaN are false). */
int nd_converge_test(const nd_converge *c, int n, const double *g, double de, nd_stop *why)
{
    double largest = nd_converge_max_force(n, g);
    double frms = nd_converge_rms_force(n, g);
    if (why)
        *why = ND_STOP_NONE;
    if (largest <= c->max_force && frms <= c->rms_force && c->max_force > 0 && c->rms_force > 0) {
        if (why)
            *why = ND_STOP_FORCE;
        return ND_OK;
    }
    if (c->energy_change > 0 && de >= 0 && de <= c->energy_change && largest <= c->energy_max_force) {
        if (why)
            *why = ND_STOP_ENERGY;
        return ND_OK;
    }
    return ND_CONTINUE;
}

const char *nd_stop_name(nd_stop why)
{
    switch (why) {
    case ND_STOP_FORCE: return "force";
    case ND_STOP_ENERGY: return "energy change";
    case ND_STOP_STEPS: return "step limit";
    case ND_STOP_STALLED: return "stalled";
    case ND_STOP_NONE: break;
    }
    return "none";
}
