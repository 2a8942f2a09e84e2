/* Rotational symmetry number from coordinates (see symmetry.h). */
#include "optimize/symmetry.h"
#include "core/numeric.h"

#include "optimize/modes.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

/* Two atoms are of one kind when they have the same element and mass. */
static int same_kind(const int *z, const double *mass, int i, int j)
{
    return z[i] == z[j] && fabs(mass[i] - mass[j]) < 1e-6;
}

/* 1 if rotating every atom by angle about unit axis a (through the origin;
 * r are centred coordinates) lands within tol of an atom of the same kind.
 * Rodrigues' rotation formula. */
static int maps_onto_itself(int n, const int *z, const double *mass, const double *r,
                            const double a[3], double angle, double tol)
{
    double c = cos(angle), s = sin(angle), t2 = tol * tol;
    for (int i = 0; i < n; i++) {
        const double *v = r + 3 * i;
        double av = a[0] * v[0] + a[1] * v[1] + a[2] * v[2];
        double w[3] = {a[1] * v[2] - a[2] * v[1], a[2] * v[0] - a[0] * v[2], a[0] * v[1] - a[1] * v[0]};
        double p[3];
        for (int k = 0; k < 3; k++)
            p[k] = v[k] * c + w[k] * s + a[k] * av * (1 - c);
        int found = 0;
        for (int j = 0; j < n && !found; j++) {
            if (!same_kind(z, mass, i, j))
                continue;
            double d0 = p[0] - r[3 * j], d1 = p[1] - r[3 * j + 1], d2 = p[2] - r[3 * j + 2];
            found = d0 * d0 + d1 * d1 + d2 * d2 < t2;
        }
        if (!found)
            return 0;
    }
    return 1;
}

static int gcd(int a, int b)
{
    while (b) {
        int t = a % b;
        a = b;
        b = t;
    }
    return a;
}

/* Greatest common divisor of the sizes of the rings about axis a: groups of
 * like off-axis atoms at the same height and distance from the axis. A
 * rotation C_n about a permutes each ring, so n divides every ring size.
 * Returns 0 when every atom is on the axis. used is n ints of scratch. */
static int ring_gcd(int n, const int *z, const double *mass, const double *r, const double a[3],
                    double tol, int *used)
{
    int g = 0;
    memset(used, 0, sizeof(int) * (size_t)n);
    for (int i = 0; i < n; i++) {
        if (used[i])
            continue;
        const double *v = r + 3 * i;
        double h = a[0] * v[0] + a[1] * v[1] + a[2] * v[2];
        double rho = sqrt(nd_larger(0.0, v[0] * v[0] + v[1] * v[1] + v[2] * v[2] - h * h));
        used[i] = 1;
        if (rho < tol)
            continue; /* on the axis */
        int count = 1;
        for (int j = i + 1; j < n; j++) {
            if (used[j] || !same_kind(z, mass, i, j))
                continue;
            const double *u = r + 3 * j;
            double hj = a[0] * u[0] + a[1] * u[1] + a[2] * u[2];
            double rj = sqrt(nd_larger(0.0, u[0] * u[0] + u[1] * u[1] + u[2] * u[2] - hj * hj));
            if (fabs(hj - h) < tol && fabs(rj - rho) < tol) {
                used[j] = 1;
                count++;
            }
        }
        g = gcd(g, count);
        if (g == 1)
            return 1;
    }
    return g;
}

typedef struct {
    double *v; /* 3 per axis */
    int n, cap;
} axis_list;

/* Appends the direction of d (normalised) unless it is shorter than tiny or
 * within about 1 degree of a listed line (a and -a are one axis). */
static int axis_add(axis_list *l, const double d[3], double tiny)
{
    double nn = sqrt(d[0] * d[0] + d[1] * d[1] + d[2] * d[2]);
    if (nn < tiny)
        return ND_OK;
    double u[3] = {d[0] / nn, d[1] / nn, d[2] / nn};
    for (int k = 0; k < l->n; k++) {
        const double *w = l->v + 3 * k;
        if (fabs(u[0] * w[0] + u[1] * w[1] + u[2] * w[2]) > 0.99985) /* cos 1 degree */
            return ND_OK;
    }
    if (l->n == l->cap) {
        int cap = l->cap ? 2 * l->cap : 64;
        double *nv = realloc(l->v, sizeof(double) * 3 * (size_t)cap);
        if (!nv)
            return ND_ENOMEM;
        l->v = nv;
        l->cap = cap;
    }
    memcpy(l->v + 3 * l->n, u, sizeof u);
    l->n++;
    return ND_OK;
}

int nd_symmetry_find(int n, const int *z, const double *mass, const double *x, double tol,
                     nd_symmetry *out, nd_error *err)
{
    if (n <= 0 || !z || !mass || !x || !out)
        return nd_fail(err, ND_EINVAL, "symmetry: no atoms or missing arrays");
    if (tol <= 0)
        tol = ND_SYMMETRY_TOL;
    memset(out, 0, sizeof *out);
    out->sigma = 1;
    out->max_order = 1;
    if (n == 1)
        return ND_OK;
    for (int i = 0; i < n; i++)
        if (!(mass[i] > 0) || !isfinite(x[3 * i]) || !isfinite(x[3 * i + 1]) || !isfinite(x[3 * i + 2]))
            return nd_fail(err, ND_EINPUT, "symmetry: atom %d has a bad mass or coordinate", i + 1);

    double *r = malloc(sizeof(double) * 3 * (size_t)n);
    int *used = malloc(sizeof(int) * (size_t)n);
    axis_list cand = {NULL, 0, 0}, found = {NULL, 0, 0};
    int status = ND_OK;
    if (!r || !used) {
        status = nd_fail(err, ND_ENOMEM, "symmetry: out of memory");
        goto done;
    }
    double c[3] = {0, 0, 0}, mt = 0;
    for (int i = 0; i < n; i++) {
        mt += mass[i];
        for (int k = 0; k < 3; k++)
            c[k] += mass[i] * x[3 * i + k];
    }
    for (int i = 0; i < n; i++)
        for (int k = 0; k < 3; k++)
            r[3 * i + k] = x[3 * i + k] - c[k] / mt;

    if (nd_modes_is_linear(n, mass, x, ND_MODES_LINEAR_TOL)) {
        /* D-infinity-h has a perpendicular C2 (equivalently, inversion maps the
         * molecule onto itself); C-infinity-v does not */
        out->linear = 1;
        int inv = 1;
        for (int i = 0; i < n && inv; i++) {
            int hit = 0;
            for (int j = 0; j < n && !hit; j++) {
                if (!same_kind(z, mass, i, j))
                    continue;
                double d0 = r[3 * i] + r[3 * j], d1 = r[3 * i + 1] + r[3 * j + 1],
                       d2 = r[3 * i + 2] + r[3 * j + 2];
                hit = d0 * d0 + d1 * d1 + d2 * d2 < tol * tol;
            }
            inv = hit;
        }
        out->sigma = inv ? 2 : 1;
        goto done;
    }

    /* candidates: principal axes */
    double mom[3], ax[9];
    status = nd_modes_inertia(n, mass, x, mom, ax, err);
    if (status != ND_OK)
        goto done;
    for (int k = 0; k < 3 && status == ND_OK; k++)
        status = axis_add(&cand, ax + 3 * k, 0.5);
    /* directions to atoms, midpoints of like equidistant pairs */
    for (int i = 0; i < n && status == ND_OK; i++)
        status = axis_add(&cand, r + 3 * i, tol);
    for (int i = 0; i < n && status == ND_OK; i++) {
        double ri = sqrt(r[3 * i] * r[3 * i] + r[3 * i + 1] * r[3 * i + 1] + r[3 * i + 2] * r[3 * i + 2]);
        for (int j = i + 1; j < n && status == ND_OK; j++) {
            if (!same_kind(z, mass, i, j))
                continue;
            double rj = sqrt(r[3 * j] * r[3 * j] + r[3 * j + 1] * r[3 * j + 1] + r[3 * j + 2] * r[3 * j + 2]);
            if (fabs(ri - rj) >= tol)
                continue;
            double m[3] = {0.5 * (r[3 * i] + r[3 * j]), 0.5 * (r[3 * i + 1] + r[3 * j + 1]),
                           0.5 * (r[3 * i + 2] + r[3 * j + 2])};
            status = axis_add(&cand, m, tol);
        }
    }
    /* normals through a reference atom a0 and two like atoms of its shell;
     * a0 is the off-centre atom with the smallest shell, to keep this cheap */
    int a0 = -1, best = n + 1;
    for (int i = 0; i < n; i++) {
        double ri = sqrt(r[3 * i] * r[3 * i] + r[3 * i + 1] * r[3 * i + 1] + r[3 * i + 2] * r[3 * i + 2]);
        if (ri < tol)
            continue;
        int cnt = 0;
        for (int j = 0; j < n; j++) {
            double rj = sqrt(r[3 * j] * r[3 * j] + r[3 * j + 1] * r[3 * j + 1] + r[3 * j + 2] * r[3 * j + 2]);
            cnt += same_kind(z, mass, i, j) && fabs(ri - rj) < tol;
        }
        if (cnt < best) {
            best = cnt;
            a0 = i;
        }
    }
    if (a0 >= 0 && best >= 3) {
        double r0 = sqrt(r[3 * a0] * r[3 * a0] + r[3 * a0 + 1] * r[3 * a0 + 1] + r[3 * a0 + 2] * r[3 * a0 + 2]);
        for (int b = 0; b < n && status == ND_OK; b++)
            for (int cc = b + 1; cc < n && status == ND_OK; cc++) {
                if (b == a0 || cc == a0 || !same_kind(z, mass, a0, b) || !same_kind(z, mass, a0, cc))
                    continue;
                double rb = sqrt(r[3 * b] * r[3 * b] + r[3 * b + 1] * r[3 * b + 1] + r[3 * b + 2] * r[3 * b + 2]);
                double rc = sqrt(r[3 * cc] * r[3 * cc] + r[3 * cc + 1] * r[3 * cc + 1] + r[3 * cc + 2] * r[3 * cc + 2]);
                if (fabs(rb - r0) >= tol || fabs(rc - r0) >= tol)
                    continue;
                double u[3], v[3];
                for (int k = 0; k < 3; k++) {
                    u[k] = r[3 * b + k] - r[3 * a0 + k];
                    v[k] = r[3 * cc + k] - r[3 * a0 + k];
                }
                double nrm[3] = {u[1] * v[2] - u[2] * v[1], u[2] * v[0] - u[0] * v[2], u[0] * v[1] - u[1] * v[0]};
                status = axis_add(&cand, nrm, tol * tol);
            }
    }
    if (status != ND_OK) {
        status = nd_fail(err, ND_ENOMEM, "symmetry: out of memory");
        goto done;
    }

    int sum = 0;
    for (int k = 0; k < cand.n; k++) {
        const double *a = cand.v + 3 * k;
        int near = 0; /* within 10 degrees of an axis already found: the same axis */
        for (int f = 0; f < found.n && !near; f++) {
            const double *w = found.v + 3 * f;
            near = fabs(a[0] * w[0] + a[1] * w[1] + a[2] * w[2]) > 0.9848;
        }
        if (near)
            continue;
        int g = ring_gcd(n, z, mass, r, a, tol, used);
        int best_n = 1;
        for (int m = (g < ND_SYMMETRY_MAX_ORDER ? g : ND_SYMMETRY_MAX_ORDER); m >= 2; m--) {
            if (g % m)
                continue;
            if (maps_onto_itself(n, z, mass, r, a, 2 * M_PI / m, tol)) {
                best_n = m;
                break;
            }
        }
        if (best_n > 1) {
            if (axis_add(&found, a, 0.5) != ND_OK) {
                status = nd_fail(err, ND_ENOMEM, "symmetry: out of memory");
                goto done;
            }
            sum += best_n - 1;
            if (best_n > out->max_order)
                out->max_order = best_n;
        }
    }
    out->naxes = found.n;
    out->sigma = 1 + sum;
done:
    free(r);
    free(used);
    free(cand.v);
    free(found.v);
    return status;
}
