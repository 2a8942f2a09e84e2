/* The minimiser handle, the method table and the whole-run driver (see
 * minimize.h). Methods live in lbfgs.c and fire.c; this file owns the
 * bookkeeping every method shares: force-call counting, checking what the
 * potential returns, the convergence test and the step limit. */
#include "optimize/minimize.h"

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

/* The methods, in the order the CLI lists them; the first is the default. */
static const nd_minimizer_type *const TYPES[] = {&nd_minimizer_lbfgs, &nd_minimizer_fire};
#define NTYPES ((int)(sizeof TYPES / sizeof TYPES[0]))

/* Wraps the caller's potential: counts calls and checks the results, so a
 * method sees only ND_OK or ND_ECOMPUTE and this file can say what failed. */
typedef struct counted {
    const nd_energy *inner;
    int calls;
    int failed;     /* 1 after the inner potential returned an error */
    int code;       /* that error */
    int nonfinite;  /* 1 after a non-finite energy or gradient */
    int bad_atom;   /* first atom with a non-finite gradient, -1 for the energy */
} counted;

struct nd_minimizer {
    const nd_minimizer_type *type;
    nd_minimize_options opt;
    int n;
    double *x, *g;
    double energy, de;
    int steps;
    int stalled;
    counted count;
    nd_energy pot; /* the counting wrapper handed to the method */
    void *state;
};

void nd_minimize_options_default(nd_minimize_options *o)
{
    memset(o, 0, sizeof *o);
    nd_converge_preset_ranking(&o->stop);
    /* 0.2 A: a bond of a drug-like molecule changes its energy by about
     * k/2 dr^2 = 12 kcal/mol at k = 600 kcal/mol/A^2 over such a step, large
     * enough to cross a torsion barrier in a few steps, small enough that a
     * quadratic model stays meaningful (common practice, no source). */
    o->max_step = 0.2;
    /* 10 pairs: Liu & Nocedal (Math. Prog. 45, 503, 1989) found 3-20
     * adequate; 10 is also scipy's L-BFGS-B default, keeping the benchmark
     * comparison like for like. */
    o->memory = 10;
    /* c1 = 1e-4 and c2 = 0.9: the values Nocedal & Wright (Numerical
     * Optimization, 2nd ed., section 3.1) recommend for quasi-Newton methods. */
    o->wolfe_c1 = 1e-4;
    o->wolfe_c2 = 0.9;
    o->max_line_calls = 20;
    o->precond = NULL;
    o->precond_refresh = 0.05;
    o->fire_dt = 0.05;
    o->fire_dt_max = 0.5;
}

const nd_minimizer_type *nd_minimizer_find(const char *name)
{
    if (!name)
        return NULL;
    for (int i = 0; i < NTYPES; i++)
        if (strcmp(TYPES[i]->name, name) == 0)
            return TYPES[i];
    return NULL;
}

const nd_minimizer_type *nd_minimizer_type_at(int i)
{
    return i >= 0 && i < NTYPES ? TYPES[i] : NULL;
}

/* The counting, checking energy function handed to methods. */
static int counted_fn(void *ctx, int n, const double *x, double *energy, double *g)
{
    counted *c = ctx;
    c->calls++;
    int s = c->inner->fn(c->inner->ctx, n, x, energy, g);
    if (s != ND_OK) {
        c->failed = 1;
        c->code = s;
        return ND_ECOMPUTE;
    }
    if (!isfinite(*energy)) {
        c->nonfinite = 1;
        c->bad_atom = -1;
        return ND_ECOMPUTE;
    }
    if (g)
        for (int i = 0; i < 3 * n; i++)
            if (!isfinite(g[i])) {
                c->nonfinite = 1;
                c->bad_atom = i / 3;
                return ND_ECOMPUTE;
            }
    return ND_OK;
}

/* Turns a failure recorded by the counting wrapper into the caller's error
 * record. An error code of the inner potential (>= 10, other than
 * ND_ECOMPUTE) is passed through, so "element not in the model" stays an
 * input error; everything else is ND_ECOMPUTE. */
static int potential_failure(const nd_minimizer *m, int step, nd_error *err)
{
    const counted *c = &m->count;
    char where[48];
    if (step == 0)
        snprintf(where, sizeof where, "at the start point");
    else
        snprintf(where, sizeof where, "in step %d", step);
    if (c->failed) {
        int code = c->code >= ND_EINVAL ? c->code : ND_ECOMPUTE;
        return nd_fail(err, (nd_status)code, "the potential failed %s (%s)", where, nd_status_name(c->code));
    }
    if (c->bad_atom < 0)
        return nd_fail(err, ND_ECOMPUTE, "the potential returned a non-finite energy %s", where);
    return nd_fail(err, ND_ECOMPUTE, "the potential returned a non-finite gradient %s, atom %d", where,
                   c->bad_atom + 1);
}

int nd_minimizer_new(nd_minimizer **out, const nd_minimizer_type *type, const nd_energy *pot, int n,
                     const double *x0, const nd_minimize_options *opt, nd_error *err)
{
    if (!out)
        return nd_fail(err, ND_EINVAL, "minimizer: no output handle");
    *out = NULL;
    if (!type || !pot || !pot->fn || !x0 || n < 1)
        return nd_fail(err, ND_EINVAL, "minimizer: needs a method, a potential and n >= 1 atoms (n = %d)", n);
    nd_minimize_options o;
    if (opt)
        o = *opt;
    else
        nd_minimize_options_default(&o);
    if (!(o.max_step > 0) || o.memory < 1 || !(o.wolfe_c1 > 0) || !(o.wolfe_c2 > o.wolfe_c1) ||
        !(o.wolfe_c2 < 1) || o.max_line_calls < 2 || !(o.fire_dt > 0) || !(o.fire_dt_max >= o.fire_dt) ||
        o.stop.max_steps < 0 || !(o.precond_refresh >= 0))
        return nd_fail(err, ND_EINVAL,
                       "minimizer: bad options (need max_step > 0, memory >= 1, 0 < c1 < c2 < 1, "
                       "max_line_calls >= 2, 0 < fire_dt <= fire_dt_max, max_steps >= 0)");
    if (o.precond && nd_precond_atoms(o.precond) != n)
        return nd_fail(err, ND_EINVAL, "minimizer: the preconditioner is for %d atoms, not %d",
                       nd_precond_atoms(o.precond), n);
    size_t n3 = 3 * (size_t)n;
    nd_minimizer *m = calloc(1, sizeof *m);
    if (!m)
        return nd_fail(err, ND_ENOMEM, "minimizer: out of memory");
    m->type = type;
    m->opt = o;
    m->n = n;
    m->count.inner = pot;
    m->pot.fn = counted_fn;
    m->pot.ctx = &m->count;
    m->x = malloc(n3 * sizeof *m->x);
    m->g = malloc(n3 * sizeof *m->g);
    m->state = calloc(1, type->state_size ? type->state_size : 1);
    int s;
    if (!m->x || !m->g || !m->state) {
        s = nd_fail(err, ND_ENOMEM, "minimizer: out of memory for %d atoms", n);
        goto fail;
    }
    memcpy(m->x, x0, n3 * sizeof *m->x);
    if (m->pot.fn(m->pot.ctx, n, m->x, &m->energy, m->g) != ND_OK) {
        s = potential_failure(m, 0, err);
        goto fail;
    }
    if ((s = type->init(m->state, n, m->x, m->energy, m->g, &m->opt, err)) != ND_OK)
        goto fail;
    *out = m;
    return ND_OK;
fail:
    nd_minimizer_free(m);
    return s;
}

int nd_minimizer_iterate(nd_minimizer *m, nd_error *err)
{
    if (!m)
        return nd_fail(err, ND_EINVAL, "minimizer: no handle");
    double e0 = m->energy;
    m->count.failed = m->count.nonfinite = 0;
    int s = m->type->iterate(m->state, &m->pot, m->n, m->x, &m->energy, m->g, err);
    if (s != ND_OK) {
        if (m->count.failed || m->count.nonfinite)
            return potential_failure(m, m->steps + 1, err);
        m->stalled = 1;
        return s;
    }
    m->steps++;
    m->de = fabs(m->energy - e0);
    return ND_OK;
}

int nd_minimizer_test(const nd_minimizer *m, nd_stop *why)
{
    return nd_converge_test(&m->opt.stop, m->n, m->g, m->steps > 0 ? m->de : -1.0, why);
}

const double *nd_minimizer_x(const nd_minimizer *m) { return m->x; }
const double *nd_minimizer_gradient(const nd_minimizer *m) { return m->g; }
double nd_minimizer_energy(const nd_minimizer *m) { return m->energy; }
double nd_minimizer_energy_change(const nd_minimizer *m) { return m->steps > 0 ? m->de : 0.0; }
int nd_minimizer_steps(const nd_minimizer *m) { return m->steps; }
int nd_minimizer_force_calls(const nd_minimizer *m) { return m->count.calls; }
int nd_minimizer_stalled(const nd_minimizer *m) { return m->stalled; }
const char *nd_minimizer_name(const nd_minimizer *m) { return m->type->name; }

void nd_minimizer_free(nd_minimizer *m)
{
    if (!m)
        return;
    if (m->state)
        m->type->free(m->state);
    free(m->state);
    free(m->x);
    free(m->g);
    free(m);
}

/* The loop of minimize.h's example, with the step limit: stops at the first
 * of convergence, max_steps iterations, a stall or an error. */
int nd_minimize(const nd_minimizer_type *type, const nd_energy *pot, int n, double *x,
                const nd_minimize_options *opt, nd_minimize_result *res, nd_error *err)
{
    nd_minimize_result r;
    memset(&r, 0, sizeof r);
    if (res)
        *res = r;
    if (!x)
        return nd_fail(err, ND_EINVAL, "minimize: no coordinates");
    nd_minimizer *m;
    int s = nd_minimizer_new(&m, type ? type : TYPES[0], pot, n, x, opt, err);
    if (s != ND_OK)
        return s;
    int limit = m->opt.stop.max_steps;
    nd_stop why = ND_STOP_NONE;
    for (;;) {
        if (nd_minimizer_test(m, &why) == ND_OK) {
            s = ND_OK;
            break;
        }
        if (limit > 0 && m->steps >= limit) {
            why = ND_STOP_STEPS;
            s = nd_fail(err, ND_CONTINUE,
                        "not converged: step limit of %d reached with largest force %.3g kcal/mol/A",
                        limit, nd_converge_max_force(n, m->g));
            break;
        }
        if ((s = nd_minimizer_iterate(m, err)) != ND_OK) {
            if (m->stalled) {
                why = ND_STOP_STALLED;
                nd_error_prefix(err, "not converged");
                if (err)
                    err->code = ND_CONTINUE;
                s = ND_CONTINUE;
            }
            break;
        }
    }
    memcpy(x, m->x, 3 * (size_t)n * sizeof *x);
    r.converged = s == ND_OK;
    r.why = why;
    r.steps = m->steps;
    r.force_calls = m->count.calls;
    r.energy = m->energy;
    r.max_force = nd_converge_max_force(n, m->g);
    r.rms_force = nd_converge_rms_force(n, m->g);
    r.energy_change = nd_minimizer_energy_change(m);
    if (res)
        *res = r;
    nd_minimizer_free(m);
    return s;
}
