/* Internal coordinates and their gradients (see coords.h). */
#include "optimize/coords.h"

#include <math.h>
#include <string.h>

static void sub(const double *a, const double *b, double *c)
{
    c[0] = a[0] - b[0];
    c[1] = a[1] - b[1];
    c[2] = a[2] - b[2];
}

static double dot3(const double *a, const double *b)
{
    return a[0] * b[0] + a[1] * b[1] + a[2] * b[2];
}

static void cross(const double *a, const double *b, double *c)
{
    c[0] = a[1] * b[2] - a[2] * b[1];
    c[1] = a[2] * b[0] - a[0] * b[2];
    c[2] = a[0] * b[1] - a[1] * b[0];
}

double nd_coords_distance(const double *xi, const double *xj, double *d)
{
    double u[3];
    sub(xj, xi, u);
    double r = sqrt(dot3(u, u));
    if (d) {
        for (int c = 0; c < 3; c++) {
            double e = r > 0 ? u[c] / r : 0.0;
            d[c] = -e;
            d[3 + c] = e;
        }
    }
    return r;
}

/* theta = atan2(|u x v|, u.v) with u = x_i - x_j, v = x_k - x_j (accurate
 * near 0 and pi, unlike acos); d theta / d x_i = (cos t u^ - v^) / (|u| sin t),
 * likewise for k, and atom j takes minus their sum (translation invariance). */
double nd_coords_angle(const double *xi, const double *xj, const double *xk, double *d, int *ok)
{
    double u[3], v[3], w[3];
    sub(xi, xj, u);
    sub(xk, xj, v);
    cross(u, v, w);
    double ru = sqrt(dot3(u, u)), rv = sqrt(dot3(v, v));
    double t = atan2(sqrt(dot3(w, w)), dot3(u, v));
    double st = sin(t), ct = cos(t);
    int good = ru > 0 && rv > 0 && t > 1e-6 && t < M_PI - 1e-6;
    if (ok)
        *ok = good;
    if (d) {
        memset(d, 0, 9 * sizeof *d);
        if (good)
            for (int c = 0; c < 3; c++) {
                double uh = u[c] / ru, vh = v[c] / rv;
                d[c] = (ct * uh - vh) / (ru * st);
                d[6 + c] = (ct * vh - uh) / (rv * st);
                d[3 + c] = -d[c] - d[6 + c];
            }
    }
    return t;
}

/* With b1 = x_j - x_i, b2 = x_k - x_j, b3 = x_l - x_k, n1 = b1 x b2 and
 * n2 = b2 x b3: phi = atan2(|b2| b1.n2, n1.n2), and (Blondel & Karplus 1996)
 *   dphi/dx_i = -|b2| / |n1|^2 n1,   dphi/dx_l = |b2| / |n2|^2 n2,
 *   dphi/dx_j = -(1 + b1.b2 / |b2|^2) dphi/dx_i + (b3.b2 / |b2|^2) dphi/dx_l,
 *   dphi/dx_k = (b1.b2 / |b2|^2) dphi/dx_i - (1 + b3.b2 / |b2|^2) dphi/dx_l. */
double nd_coords_torsion(const double *xi, const double *xj, const double *xk, const double *xl,
                         double *d, int *ok)
{
    double b1[3], b2[3], b3[3], n1[3], n2[3];
    sub(xj, xi, b1);
    sub(xk, xj, b2);
    sub(xl, xk, b3);
    cross(b1, b2, n1);
    cross(b2, b3, n2);
    double r2 = sqrt(dot3(b2, b2));
    double nn1 = dot3(n1, n1), nn2 = dot3(n2, n2);
    double phi = atan2(r2 * dot3(b1, n2), dot3(n1, n2));
    /* collinear when |n| is tiny compared with the arm lengths */
    int good = r2 > 0 && nn1 > 1e-12 * dot3(b1, b1) * r2 * r2 && nn2 > 1e-12 * dot3(b3, b3) * r2 * r2;
    if (ok)
        *ok = good;
    if (d) {
        memset(d, 0, 12 * sizeof *d);
        if (good) {
            double p = dot3(b1, b2) / (r2 * r2), q = dot3(b3, b2) / (r2 * r2);
            for (int c = 0; c < 3; c++) {
                double di = -r2 / nn1 * n1[c], dl = r2 / nn2 * n2[c];
                d[c] = di;
                d[9 + c] = dl;
                d[3 + c] = -(1 + p) * di + q * dl;
                d[6 + c] = p * di - (1 + q) * dl;
            }
        }
    }
    return phi;
}
