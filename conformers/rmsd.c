#include "conformers/rmsd.h"

#include <lapacke.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

/* Builds Horn's symmetric 4x4 matrix from the correlation matrix S of the
 * centred points (S_ij = sum_k b_ki a_kj) and returns its largest
 * eigenvalue and eigenvector (quaternion q0, q1, q2, q3). */
static double horn_max_eigen(const double s[9], double q[4])
{
    double sxx = s[0], sxy = s[1], sxz = s[2];
    double syx = s[3], syy = s[4], syz = s[5];
    double szx = s[6], szy = s[7], szz = s[8];
    double k[16] = {
        sxx + syy + szz, syz - szy,        szx - sxz,        sxy - syx,
        syz - szy,       sxx - syy - szz,  sxy + syx,        szx + sxz,
        szx - sxz,       sxy + syx,        -sxx + syy - szz, syz + szy,
        sxy - syx,       szx + sxz,        syz + szy,        -sxx - syy + szz,
    };
    double w[4];
    /* dsyev returns eigenvalues ascending, eigenvectors in columns. */
    if (LAPACKE_dsyev(LAPACK_ROW_MAJOR, 'V', 'U', 4, k, 4, w) != 0) {
        q[0] = 1.0;
        q[1] = q[2] = q[3] = 0.0;
        return sxx + syy + szz;
    }
    for (int i = 0; i < 4; i++)
        q[i] = k[4 * i + 3];
    return w[3];
}

double nd_rmsd_superpose(int n, const double *a, const double *b, double *rot, double *shift)
{
    if (n < 1) {
        if (rot) {
            memset(rot, 0, 9 * sizeof *rot);
            rot[0] = rot[4] = rot[8] = 1.0;
        }
        if (shift)
            shift[0] = shift[1] = shift[2] = 0.0;
        return 0.0;
    }
    double ca[3] = {0, 0, 0}, cb[3] = {0, 0, 0};
    for (int i = 0; i < n; i++)
        for (int k = 0; k < 3; k++) {
            ca[k] += a[3 * i + k];
            cb[k] += b[3 * i + k];
        }
    for (int k = 0; k < 3; k++) {
        ca[k] /= n;
        cb[k] /= n;
    }
    double s[9] = {0}, ga = 0.0, gb = 0.0;
    for (int i = 0; i < n; i++) {
        double pa[3], pb[3];
        for (int k = 0; k < 3; k++) {
            pa[k] = a[3 * i + k] - ca[k];
            pb[k] = b[3 * i + k] - cb[k];
            ga += pa[k] * pa[k];
            gb += pb[k] * pb[k];
        }
        for (int r = 0; r < 3; r++)
            for (int c = 0; c < 3; c++)
                s[3 * r + c] += pb[r] * pa[c];
    }
    double q[4];
    double lmax = horn_max_eigen(s, q);
    double msd = (ga + gb - 2.0 * lmax) / n;
    if (rot || shift) {
        double q0 = q[0], q1 = q[1], q2 = q[2], q3 = q[3];
        double r[9] = {
            q0 * q0 + q1 * q1 - q2 * q2 - q3 * q3, 2 * (q1 * q2 - q0 * q3), 2 * (q1 * q3 + q0 * q2),
            2 * (q1 * q2 + q0 * q3), q0 * q0 - q1 * q1 + q2 * q2 - q3 * q3, 2 * (q2 * q3 - q0 * q1),
            2 * (q1 * q3 - q0 * q2), 2 * (q2 * q3 + q0 * q1), q0 * q0 - q1 * q1 - q2 * q2 + q3 * q3,
        };
        if (rot)
            memcpy(rot, r, sizeof r);
        if (shift)
            for (int k = 0; k < 3; k++)
                shift[k] = ca[k] - (r[3 * k] * cb[0] + r[3 * k + 1] * cb[1] + r[3 * k + 2] * cb[2]);
    }
    return msd > 0.0 ? sqrt(msd) : 0.0; /* rounding can make a perfect fit slightly negative */
}

double nd_rmsd_subset(int m, const int *idx, const double *a, const double *b, const int *perm)
{
    if (m < 1)
        return 0.0;
    double stack_a[3 * 64], stack_b[3 * 64];
    double *pa = stack_a, *pb = stack_b;
    if (m > 64) {
        pa = malloc(3 * (size_t)m * sizeof *pa);
        pb = malloc(3 * (size_t)m * sizeof *pb);
        if (!pa || !pb) {
            free(pa);
            free(pb);
            return NAN;
        }
    }
    for (int k = 0; k < m; k++) {
        int i = idx[k], j = perm ? perm[i] : i;
        memcpy(pa + 3 * k, a + 3 * i, 3 * sizeof *pa);
        memcpy(pb + 3 * k, b + 3 * j, 3 * sizeof *pb);
    }
    double r = nd_rmsd_superpose(m, pa, pb, NULL, NULL);
    if (m > 64) {
        free(pa);
        free(pb);
    }
    return r;
}

void nd_rmsd_apply(int n, double *x, const double *rot, const double *shift)
{
    for (int i = 0; i < n; i++) {
        double p[3] = {x[3 * i], x[3 * i + 1], x[3 * i + 2]};
        for (int k = 0; k < 3; k++)
            x[3 * i + k] = rot[3 * k] * p[0] + rot[3 * k + 1] * p[1] + rot[3 * k + 2] * p[2] + shift[k];
    }
}
