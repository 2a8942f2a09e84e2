/* Finite-difference Hessian from analytic gradients. */
#include "optimize/hessian.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

int nd_hessian_count_free(int n, const int *frozen)
{
    int nfree = 0;
    for (int i = 0; i < n; i++)
        nfree += (frozen == NULL || frozen[i] == 0);
    return nfree;
}

/* Structures per nd_energy_batch call: the option, or by default all 6
 * nfree unless their coordinates and gradients would pass
 * ND_HESSIAN_WORK_MAX doubles; clipped to [2, 6 nfree] and rounded down to
 * an even number so a +h/-h pair never straddles two calls (it would not
 * matter for the result, but keeps the layout simple). */
static int batch_size(int n, int nfree, const nd_hessian_opts *opts)
{
    int total = 6 * nfree;
    int b = total;
    if (opts && opts->batch > 0)
        b = opts->batch;
    else if ((double)total * 6.0 * n > ND_HESSIAN_WORK_MAX)
        b = (int)(ND_HESSIAN_WORK_MAX / (6.0 * n));
    if (b > total)
        b = total;
    if (b < 2)
        b = 2;
    return b - (b % 2);
}

size_t nd_hessian_work_size(int n, int nfree, const nd_hessian_opts *opts)
{
    if (n <= 0 || nfree <= 0)
        return 0;
    size_t b = (size_t)batch_size(n, nfree, opts);
    /* displaced coordinates, their gradients, their energies */
    return b * 3 * (size_t)n * 2 + b;
}

/* Central differences (see hessian.h): coordinate j of free atom list is
 * displaced by +h and -h; the two gradients give row j. Structures are laid
 * out pair by pair and evaluated in chunks of batch_size() through
 * nd_energy_batch, which runs them in parallel when the potential has no
 * batch call. The result is assembled in a fixed order, so it does not
 * depend on the number of threads. */
int nd_hessian_compute(const nd_energy *pot, int n, const double *x, const int *frozen,
                       const nd_hessian_opts *opts, double *work, double *h, double *g0,
                       nd_hessian_info *info, nd_error *err)
{
    if (!pot || !pot->fn || !x || !h)
        return nd_fail(err, ND_EINVAL, "hessian: missing potential, coordinates or output");
    if (n <= 0)
        return nd_fail(err, ND_EINVAL, "hessian: %d atoms", n);
    double step = (opts && opts->step != 0.0) ? opts->step : ND_HESSIAN_STEP_DEFAULT;
    if (!(step > 0.0) || !isfinite(step))
        return nd_fail(err, ND_EINVAL, "hessian: step %g must be a positive number", step);
    int nfree = nd_hessian_count_free(n, frozen);
    if (nfree == 0)
        return nd_fail(err, ND_EINVAL, "hessian: every atom is frozen");
    for (int i = 0; i < 3 * n; i++)
        if (!isfinite(x[i]))
            return nd_fail(err, ND_EINPUT, "hessian: atom %d has a non-finite coordinate", i / 3 + 1);

    int *coord = malloc(sizeof(int) * 3 * (size_t)nfree); /* free coordinate -> Cartesian index */
    double *own = NULL;
    int status = ND_OK;
    if (!coord)
        return nd_fail(err, ND_ENOMEM, "hessian: out of memory");
    if (!work) {
        own = malloc(sizeof(double) * nd_hessian_work_size(n, nfree, opts));
        if (!own) {
            status = nd_fail(err, ND_ENOMEM, "hessian: out of memory for %d atoms", n);
            goto done;
        }
        work = own;
    }
    int nc = 0;
    for (int i = 0; i < n; i++)
        if (frozen == NULL || frozen[i] == 0)
            for (int k = 0; k < 3; k++)
                coord[nc++] = 3 * i + k;

    size_t stride = 3 * (size_t)n;
    int b = batch_size(n, nfree, opts);
    double *xs = work, *gs = work + (size_t)b * stride, *es = gs + (size_t)b * stride;
    int total = 2 * nc; /* structures: pair j is 2j (+h) and 2j+1 (-h) */
    int ncalls = 0;
    for (int s0 = 0; s0 < total; s0 += b) {
        int m = (total - s0 < b) ? total - s0 : b;
        for (int s = 0; s < m; s++) {
            int j = (s0 + s) / 2;
            double *xk = xs + (size_t)s * stride;
            memcpy(xk, x, sizeof(double) * stride);
            xk[coord[j]] += ((s0 + s) % 2 == 0) ? step : -step;
        }
        status = nd_energy_batch(pot, n, m, xs, es, gs);
        ncalls += m;
        if (status != ND_OK) {
            status = nd_fail(err, status, "hessian: the potential failed at a displaced structure");
            goto done;
        }
        for (int s = 0; s < m; s += 2) {
            int j = (s0 + s) / 2;
            const double *gp = gs + (size_t)s * stride, *gm = gp + stride;
            for (int i = 0; i < nc; i++) {
                double v = (gp[coord[i]] - gm[coord[i]]) / (2.0 * step);
                if (!isfinite(v)) {
                    status = nd_fail(err, ND_ECOMPUTE,
                                     "hessian: non-finite gradient when displacing atom %d",
                                     coord[j] / 3 + 1);
                    goto done;
                }
                h[(size_t)j * nc + i] = v;
            }
        }
    }

    double asym = 0.0;
    for (int i = 0; i < nc; i++)
        for (int j = i + 1; j < nc; j++) {
            double a = h[(size_t)i * nc + j], c = h[(size_t)j * nc + i];
            if (fabs(a - c) > asym)
                asym = fabs(a - c);
            h[(size_t)i * nc + j] = h[(size_t)j * nc + i] = 0.5 * (a + c);
        }

    if (g0) {
        double e0;
        status = nd_energy_batch(pot, n, 1, x, &e0, g0);
        ncalls++;
        if (status != ND_OK) {
            status = nd_fail(err, status, "hessian: the potential failed at the reference structure");
            goto done;
        }
    }
    if (info) {
        info->nfree = nfree;
        info->ncalls = ncalls;
        info->step = step;
        info->asymmetry = asym;
    }
done:
    free(own);
    free(coord);
    return status;
}
