/* Ensemble spreads; see ensemble.h. */
#include "potential/ensemble.h"

#include <math.h>
#include <stddef.h>

void nd_ensemble_stats(int K, const double *v, double *mean, double *spread)
{
    double s = 0;
    for (int k = 0; k < K; k++)
        s += v[k];
    double mu = K > 0 ? s / K : 0, ss = 0;
    for (int k = 0; k < K; k++)
        ss += (v[k] - mu) * (v[k] - mu);
    if (mean)
        *mean = mu;
    if (spread)
        *spread = K > 1 ? sqrt(ss / (K - 1)) : 0;
}

double nd_ensemble_difference_spread(int K, const double *a, const double *b, double *mean)
{
    double s = 0;
    for (int k = 0; k < K; k++)
        s += a[k] - b[k];
    double mu = K > 0 ? s / K : 0, ss = 0;
    for (int k = 0; k < K; k++) {
        double d = a[k] - b[k] - mu;
        ss += d * d;
    }
    if (mean)
        *mean = mu;
    return K > 1 ? sqrt(ss / (K - 1)) : 0;
}

int nd_ensemble_members(nd_potential *p, int m, const double *x, double *e, double *g,
                        nd_error *err)
{
    return nd_potential_compute(p, m, x, NULL, NULL, e, g, err);
}

double nd_ensemble_force_spread(int K, int n, const double *member_grad)
{
    double worst = 0;
    if (K < 2)
        return 0;
    for (int i = 0; i < n; i++) {
        double var = 0;
        for (int c = 0; c < 3; c++) {
            double s = 0;
            for (int k = 0; k < K; k++)
                s += member_grad[(size_t)k * 3 * n + 3 * (size_t)i + c];
            double mu = s / K, ss = 0;
            for (int k = 0; k < K; k++) {
                double d = member_grad[(size_t)k * 3 * n + 3 * (size_t)i + c] - mu;
                ss += d * d;
            }
            var += ss / (K - 1);
        }
        if (sqrt(var) > worst)
            worst = sqrt(var);
    }
    return worst;
}
