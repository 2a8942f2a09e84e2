/* L-BFGS: the limited-memory BFGS method of J. Nocedal, "Updating
 * quasi-Newton matrices with limited storage", Math. Comp. 35, 773 (1980),
 * as analysed by D. C. Liu and J. Nocedal, Math. Prog. 45, 503 (1989).
 *
 * Each step: the direction d = -H g from the two-loop recursion (Nocedal &
 * Wright, Numerical Optimization, 2nd ed., Algorithm 7.4) over the last
 * `memory` pairs (s, y); the initial matrix H0 is gamma I with the scaling
 * gamma = s.y / y.y of the newest pair (eq. 7.20), or gamma P^-1 with
 * gamma = s.y / y.P^-1 y when a model Hessian P is given (precondition.h).
 * The step length comes from a line search for the strong Wolfe conditions
 * (Algorithms 3.5 and 3.6, with safeguarded cubic interpolation, eq. 3.59),
 * which guarantees sufficient decrease, and s.y > 0 so the update keeps H
 * positive definite. No atom moves more than max_step in a step: the step
 * length is capped, and at the cap a point with sufficient decrease is
 * accepted without the curvature condition (the pair is then stored only
 * if s.y > 0). A direction that is not downhill, or a line search that
 * fails, discards the memory and restarts along -H0 g; a failure along that
 * direction is a stall (ND_ECOMPUTE; the caller reports "not converged"). */
#include "optimize/minimize.h"
#include "core/numeric.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

typedef struct lbfgs {
    int n, n3, m;
    int k;      /* pairs stored, <= m */
    int head;   /* slot of the newest pair */
    double gamma;
    double *s, *y, *rho, *alpha;
    double *d, *xt, *gt, *xl, *gl, *work, *xpc;
    nd_minimize_options opt;
} lbfgs;

static double dot(int n, const double *a, const double *b)
{
    double s = 0;
    for (int i = 0; i < n; i++)
        s += a[i] * b[i];
    return s;
}

/* Largest atomic norm of a 3n vector. */
static double max_atom(int n, const double *v)
{
    double m = 0;
    for (int i = 0; i < n; i++) {
        double a = v[3 * i] * v[3 * i] + v[3 * i + 1] * v[3 * i + 1] + v[3 * i + 2] * v[3 * i + 2];
        if (a > m)
            m = a;
    }
    return sqrt(m);
}

static void lbfgs_free(void *state)
{
    lbfgs *st = state;
    free(st->s);
    free(st->y);
    free(st->rho);
    free(st->alpha);
    free(st->d);
    free(st->xt);
    free(st->gt);
    free(st->xl);
    free(st->gl);
    free(st->work);
    free(st->xpc);
}

static int lbfgs_init(void *state, int n, const double *x, double energy, const double *g,
                      const nd_minimize_options *opt, nd_error *err)
{
    (void)energy;
    (void)g;
    lbfgs *st = state;
    st->n = n;
    st->n3 = 3 * n;
    st->m = opt->memory;
    st->opt = *opt;
    st->gamma = 1.0;
    size_t n3 = (size_t)st->n3, m = (size_t)st->m;
    st->s = malloc(m * n3 * sizeof(double));
    st->y = malloc(m * n3 * sizeof(double));
    st->rho = malloc(m * sizeof(double));
    st->alpha = malloc(m * sizeof(double));
    st->d = malloc(n3 * sizeof(double));
    st->xt = malloc(n3 * sizeof(double));
    st->gt = malloc(n3 * sizeof(double));
    st->xl = malloc(n3 * sizeof(double));
    st->gl = malloc(n3 * sizeof(double));
    st->work = malloc(n3 * sizeof(double));
    st->xpc = malloc(n3 * sizeof(double));
    if (!st->s || !st->y || !st->rho || !st->alpha || !st->d || !st->xt || !st->gt || !st->xl ||
        !st->gl || !st->work || !st->xpc)
        return nd_fail(err, ND_ENOMEM, "lbfgs: out of memory for %d atoms", n);
    memcpy(st->xpc, x, n3 * sizeof(double));
    if (opt->precond)
        return nd_precond_update(opt->precond, x, err);
    return ND_OK;
}

/* d = -H g by the two-loop recursion (Nocedal & Wright Algorithm 7.4). */
static void direction(lbfgs *st, const double *g)
{
    int n3 = st->n3;
    double *q = st->d;
    memcpy(q, g, (size_t)n3 * sizeof *q);
    for (int j = 0; j < st->k; j++) {
        int i = (st->head - j + st->m) % st->m;
        st->alpha[i] = st->rho[i] * dot(n3, st->s + (size_t)i * n3, q);
        const double *yi = st->y + (size_t)i * n3;
        for (int c = 0; c < n3; c++)
            q[c] -= st->alpha[i] * yi[c];
    }
    if (st->opt.precond)
        nd_precond_solve(st->opt.precond, q, q);
    for (int c = 0; c < n3; c++)
        q[c] *= st->gamma;
    for (int j = st->k - 1; j >= 0; j--) {
        int i = (st->head - j + st->m) % st->m;
        double beta = st->rho[i] * dot(n3, st->y + (size_t)i * n3, q);
        const double *si = st->s + (size_t)i * n3;
        for (int c = 0; c < n3; c++)
            q[c] += si[c] * (st->alpha[i] - beta);
    }
    for (int c = 0; c < n3; c++)
        q[c] = -q[c];
}

/* Evaluates phi(a) = E(x + a d) and phi'(a) = g(x + a d) . d into xt, gt. */
static int eval_at(lbfgs *st, const nd_energy *pot, const double *x, double a, double *f, double *df)
{
    for (int c = 0; c < st->n3; c++)
        st->xt[c] = x[c] + a * st->d[c];
    int s = pot->fn(pot->ctx, st->n, st->xt, f, st->gt);
    if (s != ND_OK)
        return s;
    *df = dot(st->n3, st->gt, st->d);
    return ND_OK;
}

/* Minimiser of the cubic through (a, fa, da) and (b, fb, db), Nocedal &
 * Wright eq. 3.59; NAN when the cubic has no minimiser. */
static double cubic_min(double a, double fa, double da, double b, double fb, double db)
{
    double d1 = da + db - 3 * (fa - fb) / (a - b);
    double disc = d1 * d1 - da * db;
    if (!(disc >= 0))
        return NAN;
    double d2 = copysign(sqrt(disc), b - a);
    double den = db - da + 2 * d2;
    if (den == 0)
        return NAN;
    return b - (b - a) * (db + d2 - d1) / den;
}

typedef struct lspoint {
    double a, f, df;
} lspoint;

/* Line search for the strong Wolfe conditions along st->d from x (energy
 * f0, slope df0 < 0), step lengths in (0, amax]. On success returns ND_OK
 * with the accepted point in xt, gt and its energy in *f; ND_CONTINUE when
 * no point with sufficient decrease was found within max_line_calls; or the
 * potential's error. The lowest point satisfying the Armijo condition is
 * kept in xl, gl (the "lo" end of Algorithm 3.6), so running out of calls
 * still returns progress when there is any. */
static int line_search(lbfgs *st, const nd_energy *pot, const double *x, double f0, double df0,
                       double amax, double *f)
{
    const double c1 = st->opt.wolfe_c1, c2 = st->opt.wolfe_c2;
    const int maxcalls = st->opt.max_line_calls;
    size_t bytes = (size_t)st->n3 * sizeof(double);
    int calls = 0, s;
    lspoint prev = {0, f0, df0}, cur, lo, hi;
    cur.a = fmin(1.0, amax);
    for (;;) {
        if ((s = eval_at(st, pot, x, cur.a, &cur.f, &cur.df)) != ND_OK)
            return s;
        calls++;
        if (cur.f > f0 + c1 * cur.a * df0 || (calls > 1 && cur.f >= prev.f)) {
            lo = prev; /* xl, gl hold prev when prev.a > 0 */
            hi = cur;
            break;
        }
        if (fabs(cur.df) <= -c2 * df0)
            goto accept;
        if (cur.df >= 0) {
            lo = cur;
            hi = prev;
            memcpy(st->xl, st->xt, bytes);
            memcpy(st->gl, st->gt, bytes);
            break;
        }
        if (cur.a >= amax || calls >= maxcalls)
            goto accept; /* sufficient decrease, still downhill: the step cap */
        prev = cur;
        memcpy(st->xl, st->xt, bytes);
        memcpy(st->gl, st->gt, bytes);
        cur.a = fmin(3.0 * cur.a, amax);
    }
    /* zoom (Algorithm 3.6): lo satisfies the Armijo condition and has the
     * lowest energy found; the minimiser lies between lo and hi. */
    while (calls < maxcalls) {
        double w = fabs(hi.a - lo.a);
        if (w <= 1e-14 * nd_larger(lo.a, hi.a))
            break;
        double a = cubic_min(lo.a, lo.f, lo.df, hi.a, hi.f, hi.df);
        double left = fmin(lo.a, hi.a) + 0.1 * w, right = nd_larger(lo.a, hi.a) - 0.1 * w;
        if (!(a >= left && a <= right))
            a = 0.5 * (lo.a + hi.a);
        cur.a = a;
        if ((s = eval_at(st, pot, x, cur.a, &cur.f, &cur.df)) != ND_OK)
            return s;
        calls++;
        if (cur.f > f0 + c1 * cur.a * df0 || cur.f >= lo.f) {
            hi = cur;
        } else {
            if (fabs(cur.df) <= -c2 * df0)
                goto accept;
            if (cur.df * (hi.a - lo.a) >= 0)
                hi = lo;
            lo = cur;
            memcpy(st->xl, st->xt, bytes);
            memcpy(st->gl, st->gt, bytes);
        }
    }
    if (lo.a > 0 && lo.f < f0) {
        memcpy(st->xt, st->xl, bytes);
        memcpy(st->gt, st->gl, bytes);
        *f = lo.f;
        return ND_OK;
    }
    return ND_CONTINUE;
accept:
    *f = cur.f;
    return ND_OK;
}

/* One L-BFGS step; see the file comment. */
static int lbfgs_iterate(void *state, const nd_energy *pot, int n, double *x, double *energy, double *g,
                         nd_error *err)
{
    lbfgs *st = state;
    int n3 = st->n3;
    double fnew = *energy;
    int s = ND_CONTINUE;
    for (int attempt = 0; attempt < 2; attempt++) {
        direction(st, g);
        double df0 = dot(n3, g, st->d);
        if (!(df0 < 0) && st->k > 0) { /* uphill: restart from H0 */
            st->k = 0;
            st->gamma = 1.0;
            direction(st, g);
            df0 = dot(n3, g, st->d);
        }
        double dmax = max_atom(n, st->d);
        if (!(df0 < 0) || !(dmax > 0))
            return nd_fail(err, ND_ECOMPUTE, "lbfgs: stalled: no downhill direction (largest force %.3g)",
                           max_atom(n, g));
        double amax = st->opt.max_step / dmax;
        s = line_search(st, pot, x, *energy, df0, amax, &fnew);
        if (s == ND_OK)
            break;
        if (s != ND_CONTINUE)
            return s;
        if (st->k == 0)
            break; /* failed along -H0 g already */
        st->k = 0; /* restart: forget the pairs and try -H0 g */
        st->gamma = 1.0;
    }
    if (s != ND_OK)
        return nd_fail(err, ND_ECOMPUTE,
                       "lbfgs: stalled: the line search found no lower energy (largest force %.3g)",
                       max_atom(n, g));
    /* the new pair s = x+ - x, y = g+ - g */
    int slot = (st->head + 1) % st->m;
    double *sv = st->s + (size_t)slot * n3, *yv = st->y + (size_t)slot * n3;
    for (int c = 0; c < n3; c++) {
        sv[c] = st->xt[c] - x[c];
        yv[c] = st->gt[c] - g[c];
    }
    double sy = dot(n3, sv, yv);
    double yy;
    if (st->opt.precond) {
        nd_precond_solve(st->opt.precond, yv, st->work);
        yy = dot(n3, yv, st->work);
    } else {
        yy = dot(n3, yv, yv);
    }
    /* keep the pair only with enough curvature that H stays positive
     * definite in floating point (Nocedal & Wright section 7.2 skip rule) */
    if (sy > 1e-12 * sqrt(dot(n3, sv, sv) * dot(n3, yv, yv)) && yy > 0) {
        st->head = slot;
        st->rho[slot] = 1.0 / sy;
        if (st->k < st->m)
            st->k++;
        st->gamma = sy / yy;
    }
    memcpy(x, st->xt, (size_t)n3 * sizeof *x);
    memcpy(g, st->gt, (size_t)n3 * sizeof *g);
    *energy = fnew;
    if (st->opt.precond) {
        for (int c = 0; c < n3; c++)
            st->work[c] = x[c] - st->xpc[c];
        if (max_atom(n, st->work) > st->opt.precond_refresh) {
            if ((s = nd_precond_update(st->opt.precond, x, err)) != ND_OK)
                return s;
            memcpy(st->xpc, x, (size_t)n3 * sizeof *x);
        }
    }
    return ND_OK;
}

const nd_minimizer_type nd_minimizer_lbfgs = {"lbfgs", sizeof(lbfgs), lbfgs_init, lbfgs_iterate,
                                              lbfgs_free};
