/* FIRE, the fast inertial relaxation engine of E. Bitzek, P. Koskinen,
 * F. Gahler, M. Moseler and P. Gumbsch, Phys. Rev. Lett. 97, 170201 (2006),
 * with the parameters published there: N_min = 5, f_inc = 1.1, f_dec = 0.5,
 * alpha_start = 0.1, f_alpha = 0.99, and dt_max = 10 dt (the paper's
 * suggestion; nd_minimize_options.fire_dt_max).
 *
 * Molecular dynamics with unit masses and the FIRE velocity mixing. One
 * iteration is one force call:
 *   P = F.v;
 *   if P > 0: v <- (1 - alpha) v + alpha |v| F/|F|, and after N_min such
 *             steps in a row dt <- min(f_inc dt, dt_max), alpha <- f_alpha alpha;
 *   else:     dt <- f_dec dt, v <- 0, alpha <- alpha_start;
 *   v <- v + dt F;  x <- x + dt v  (semi-implicit Euler, the integrator
 *   recommended for FIRE by J. Guenole et al., Comput. Mater. Sci. 175,
 *   109584, 2020), with the displacement scaled down so no atom moves more
 *   than max_step.
 * Time is in units where mass 1 (amu) times (angstrom / time)^2 is one
 * kcal/mol. The default dt = 0.05 is stable for a harmonic bond up to
 * k = (2 / dt)^2 = 1600 kcal/mol/A^2 (stiffer than any single bond to H);
 * at dt_max the step cap and the P <= 0 reset keep it stable. */
#include "optimize/minimize.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

enum { FIRE_N_MIN = 5 };
static const double FIRE_F_INC = 1.1, FIRE_F_DEC = 0.5, FIRE_ALPHA_START = 0.1, FIRE_F_ALPHA = 0.99;

typedef struct fire {
    int n, n3;
    double dt, dt_max, alpha, max_step;
    int npos; /* steps since P was last <= 0 */
    double *v, *dx, *xt, *gt;
} fire;

static void fire_free(void *state)
{
    fire *st = state;
    free(st->v);
    free(st->dx);
    free(st->xt);
    free(st->gt);
}

static int fire_init(void *state, int n, const double *x, double energy, const double *g,
                     const nd_minimize_options *opt, nd_error *err)
{
    (void)x;
    (void)energy;
    (void)g;
    fire *st = state;
    st->n = n;
    st->n3 = 3 * n;
    st->dt = opt->fire_dt;
    st->dt_max = opt->fire_dt_max;
    st->alpha = FIRE_ALPHA_START;
    st->max_step = opt->max_step;
    st->npos = 0;
    size_t n3 = (size_t)st->n3;
    st->v = calloc(n3, sizeof(double));
    st->dx = malloc(n3 * sizeof(double));
    st->xt = malloc(n3 * sizeof(double));
    st->gt = malloc(n3 * sizeof(double));
    if (!st->v || !st->dx || !st->xt || !st->gt)
        return nd_fail(err, ND_ENOMEM, "fire: out of memory for %d atoms", n);
    return ND_OK;
}

/* One FIRE step; see the file comment. The forces are F = -g. */
static int fire_iterate(void *state, const nd_energy *pot, int n, double *x, double *energy, double *g,
                        nd_error *err)
{
    (void)err;
    fire *st = state;
    int n3 = st->n3;
    double p = 0, vv = 0, ff = 0;
    for (int c = 0; c < n3; c++) {
        p -= g[c] * st->v[c];
        vv += st->v[c] * st->v[c];
        ff += g[c] * g[c];
    }
    if (p > 0) {
        double mix = ff > 0 ? st->alpha * sqrt(vv / ff) : 0;
        for (int c = 0; c < n3; c++)
            st->v[c] = (1 - st->alpha) * st->v[c] - mix * g[c];
        if (++st->npos > FIRE_N_MIN) {
            st->dt = fmin(st->dt * FIRE_F_INC, st->dt_max);
            st->alpha *= FIRE_F_ALPHA;
        }
    } else {
        st->dt *= FIRE_F_DEC;
        memset(st->v, 0, (size_t)n3 * sizeof *st->v);
        st->alpha = FIRE_ALPHA_START;
        st->npos = 0;
    }
    double big = 0;
    for (int c = 0; c < n3; c++) {
        st->v[c] -= st->dt * g[c];
        st->dx[c] = st->dt * st->v[c];
    }
    for (int i = 0; i < n; i++) {
        const double *d = st->dx + 3 * i;
        double a = d[0] * d[0] + d[1] * d[1] + d[2] * d[2];
        if (a > big)
            big = a;
    }
    big = sqrt(big);
    double scale = big > st->max_step ? st->max_step / big : 1.0;
    for (int c = 0; c < n3; c++)
        st->xt[c] = x[c] + scale * st->dx[c];
    double e;
    int s = pot->fn(pot->ctx, n, st->xt, &e, st->gt);
    if (s != ND_OK)
        return s;
    memcpy(x, st->xt, (size_t)n3 * sizeof *x);
    memcpy(g, st->gt, (size_t)n3 * sizeof *g);
    *energy = e;
    return ND_OK;
}

const nd_minimizer_type nd_minimizer_fire = {"fire", sizeof(fire), fire_init, fire_iterate, fire_free};
