/* Frozen atoms and harmonic restraints as a wrapping potential (see
 * restrain.h). Gradients are exact: the chain rule through the internal
 * coordinate gradients of coords.c, which the tests check by finite
 * differences. */
#include "optimize/restrain.h"

#include "optimize/coords.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

typedef struct restraint {
    nd_restraint_kind kind;
    int atoms[4];
    double target; /* angstrom, or radians */
    double k;
} restraint;

struct nd_restraints {
    nd_energy inner;
    int n;
    unsigned char *frozen;
    restraint *list;
    int count, cap;
};

static const double DEG = M_PI / 180.0;

int nd_restraints_new(nd_restraints **out, const nd_energy *inner, int n, nd_error *err)
{
    if (!out)
        return nd_fail(err, ND_EINVAL, "restraints: no output handle");
    *out = NULL;
    if (!inner || !inner->fn || n < 1)
        return nd_fail(err, ND_EINVAL, "restraints: need a potential and n >= 1 atoms (n = %d)", n);
    nd_restraints *r = calloc(1, sizeof *r);
    if (!r || !(r->frozen = calloc((size_t)n, 1))) {
        free(r);
        return nd_fail(err, ND_ENOMEM, "restraints: out of memory");
    }
    r->inner = *inner;
    r->n = n;
    *out = r;
    return ND_OK;
}

void nd_restraints_free(nd_restraints *r)
{
    if (!r)
        return;
    free(r->frozen);
    free(r->list);
    free(r);
}

int nd_restraints_freeze(nd_restraints *r, int atom, nd_error *err)
{
    if (!r || atom < 0 || atom >= r->n)
        return nd_fail(err, ND_EINVAL, "restraints: cannot freeze atom %d (there are %d atoms)", atom + 1,
                       r ? r->n : 0);
    r->frozen[atom] = 1;
    return ND_OK;
}

static int atoms_of(nd_restraint_kind kind)
{
    return kind == ND_RESTRAIN_DISTANCE ? 2 : kind == ND_RESTRAIN_ANGLE ? 3 : kind == ND_RESTRAIN_TORSION ? 4 : 0;
}

/* Target in internal units (angstrom or radians), checked. */
static int check_target(nd_restraint_kind kind, double target, double *internal, nd_error *err)
{
    if (!isfinite(target))
        return nd_fail(err, ND_EINVAL, "restraints: the target is not a finite number");
    switch (kind) {
    case ND_RESTRAIN_DISTANCE:
        if (target < 0)
            return nd_fail(err, ND_EINVAL, "restraints: distance target %g A is negative", target);
        *internal = target;
        return ND_OK;
    case ND_RESTRAIN_ANGLE:
        if (target < 0 || target > 180)
            return nd_fail(err, ND_EINVAL, "restraints: angle target %g degrees is outside 0..180", target);
        *internal = target * DEG;
        return ND_OK;
    case ND_RESTRAIN_TORSION:
        /* any value; stored wrapped into (-pi, pi] */
        *internal = remainder(target * DEG, 2 * M_PI);
        if (*internal <= -M_PI)
            *internal += 2 * M_PI;
        return ND_OK;
    }
    return nd_fail(err, ND_EINVAL, "restraints: unknown restraint kind %d", (int)kind);
}

int nd_restraints_add(nd_restraints *r, nd_restraint_kind kind, const int *atoms, double target,
                      double k, int *index, nd_error *err)
{
    if (!r || !atoms)
        return nd_fail(err, ND_EINVAL, "restraints: no restraint set or atoms");
    int na = atoms_of(kind);
    if (na == 0)
        return nd_fail(err, ND_EINVAL, "restraints: unknown restraint kind %d", (int)kind);
    for (int a = 0; a < na; a++) {
        if (atoms[a] < 0 || atoms[a] >= r->n)
            return nd_fail(err, ND_EINVAL, "restraints: atom %d is out of range (1..%d)", atoms[a] + 1, r->n);
        for (int b = 0; b < a; b++)
            if (atoms[a] == atoms[b])
                return nd_fail(err, ND_EINVAL, "restraints: atom %d appears twice", atoms[a] + 1);
    }
    if (!(k >= 0) || !isfinite(k))
        return nd_fail(err, ND_EINVAL, "restraints: force constant %g must be finite and >= 0", k);
    double t;
    int s = check_target(kind, target, &t, err);
    if (s != ND_OK)
        return s;
    if (r->count == r->cap) {
        int cap = r->cap ? 2 * r->cap : 8;
        restraint *l = realloc(r->list, (size_t)cap * sizeof *l);
        if (!l)
            return nd_fail(err, ND_ENOMEM, "restraints: out of memory");
        r->list = l;
        r->cap = cap;
    }
    restraint *q = &r->list[r->count];
    memset(q, 0, sizeof *q);
    q->kind = kind;
    memcpy(q->atoms, atoms, (size_t)na * sizeof *atoms);
    q->target = t;
    q->k = k;
    if (index)
        *index = r->count;
    r->count++;
    return ND_OK;
}

int nd_restraints_set_target(nd_restraints *r, int index, double target, nd_error *err)
{
    if (!r || index < 0 || index >= r->count)
        return nd_fail(err, ND_EINVAL, "restraints: no restraint %d", index);
    return check_target(r->list[index].kind, target, &r->list[index].target, err);
}

/* Value of restraint q at x (internal units) and its gradient d (3 entries
 * per atom of q) when d is not NULL; *ok = 0 where the gradient is undefined. */
static double value_of(const restraint *q, const double *x, double *d, int *ok)
{
    const int *a = q->atoms;
    *ok = 1;
    switch (q->kind) {
    case ND_RESTRAIN_DISTANCE: return nd_coords_distance(x + 3 * a[0], x + 3 * a[1], d);
    case ND_RESTRAIN_ANGLE: return nd_coords_angle(x + 3 * a[0], x + 3 * a[1], x + 3 * a[2], d, ok);
    case ND_RESTRAIN_TORSION:
        return nd_coords_torsion(x + 3 * a[0], x + 3 * a[1], x + 3 * a[2], x + 3 * a[3], d, ok);
    }
    *ok = 0;
    return NAN;
}

double nd_restraints_value(const nd_restraints *r, int index, const double *x)
{
    if (!r || !x || index < 0 || index >= r->count)
        return NAN;
    int ok;
    const restraint *q = &r->list[index];
    double v = value_of(q, x, NULL, &ok);
    return q->kind == ND_RESTRAIN_DISTANCE ? v : v / DEG;
}

/* E = k/2 dq^2, dq wrapped into (-pi, pi] for torsions; dE/dx = k dq dq/dx.
 * At a point where the coordinate's gradient is undefined (a collinear
 * torsion) the energy is still counted and the gradient of that term is
 * zero: such points have measure zero and are not minima of the term. */
double nd_restraints_penalty(const nd_restraints *r, const double *x, double *g)
{
    if (g)
        memset(g, 0, 3 * (size_t)r->n * sizeof *g);
    double e = 0, d[12];
    for (int i = 0; i < r->count; i++) {
        const restraint *q = &r->list[i];
        int ok;
        double v = value_of(q, x, g ? d : NULL, &ok);
        double dq = v - q->target;
        if (q->kind == ND_RESTRAIN_TORSION)
            dq = remainder(dq, 2 * M_PI);
        e += 0.5 * q->k * dq * dq;
        if (g && ok) {
            int na = atoms_of(q->kind);
            for (int a = 0; a < na; a++)
                for (int c = 0; c < 3; c++)
                    g[3 * q->atoms[a] + c] += q->k * dq * d[3 * a + c];
        }
    }
    return e;
}

const unsigned char *nd_restraints_frozen(const nd_restraints *r)
{
    return r ? r->frozen : NULL;
}

int nd_restraints_count(const nd_restraints *r)
{
    return r ? r->count : 0;
}

/* The wrapping energy: inner + penalty; frozen atoms' gradients zeroed.
 * The penalty gradient goes to a buffer allocated per call (r is only
 * read), so concurrent calls are safe. */
static int restrained_fn(void *ctx, int n, const double *x, double *energy, double *g)
{
    const nd_restraints *r = ctx;
    if (n != r->n)
        return ND_EINVAL;
    int s = r->inner.fn(r->inner.ctx, n, x, energy, g);
    if (s != ND_OK)
        return s;
    if (r->count > 0) {
        double *gp = NULL;
        if (g && !(gp = malloc(3 * (size_t)n * sizeof *gp)))
            return ND_ENOMEM;
        *energy += nd_restraints_penalty(r, x, gp);
        if (g)
            for (int i = 0; i < 3 * n; i++)
                g[i] += gp[i];
        free(gp);
    }
    if (g)
        for (int a = 0; a < n; a++)
            if (r->frozen[a])
                g[3 * a] = g[3 * a + 1] = g[3 * a + 2] = 0;
    return ND_OK;
}

nd_energy nd_restraints_energy(const nd_restraints *r)
{
    nd_energy e = {restrained_fn, NULL, (void *)r};
    return e;
}
