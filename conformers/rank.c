#include "conformers/rank.h"

#include "core/units.h"

#include <math.h>
#include <stdlib.h>

typedef struct {
    double key;
    int index;
} keyed;

static int cmp_keyed(const void *a, const void *b)
{
    const keyed *x = a, *y = b;
    if (x->key < y->key)
        return -1;
    if (x->key > y->key)
        return 1;
    return (x->index > y->index) - (x->index < y->index);
}

void nd_rank_order(int n, const double *key, int *order)
{
    keyed *k = malloc((size_t)(n > 0 ? n : 1) * sizeof *k);
    if (!k) { /* fall back to insertion sort without extra memory */
        for (int i = 0; i < n; i++)
            order[i] = i;
        for (int i = 1; i < n; i++)
            for (int j = i; j > 0 && key[order[j - 1]] > key[order[j]]; j--) {
                int t = order[j];
                order[j] = order[j - 1];
                order[j - 1] = t;
            }
        return;
    }
    for (int i = 0; i < n; i++)
        k[i] = (keyed){key[i], i};
    qsort(k, (size_t)n, sizeof *k, cmp_keyed);
    for (int i = 0; i < n; i++)
        order[i] = k[i].index;
    free(k);
}

int nd_rank_boltzmann(int n, const double *e, double t, double *w, nd_error *err)
{
    if (n < 1)
        return nd_fail(err, ND_EINVAL, "Boltzmann weights of no states");
    double emin = INFINITY;
    for (int i = 0; i < n; i++) {
        if (!isfinite(e[i]))
            return nd_fail(err, ND_EINVAL, "state %d has a non-finite energy", i + 1);
        emin = fmin(emin, e[i]);
    }
    double sum = 0.0;
    if (t <= 0.0) {
        for (int i = 0; i < n; i++)
            sum += w[i] = (e[i] == emin);
    } else {
        double rt = ND_BOLTZMANN_KCALMOL * t;
        for (int i = 0; i < n; i++)
            sum += w[i] = exp(-(e[i] - emin) / rt);
    }
    for (int i = 0; i < n; i++)
        w[i] /= sum;
    return ND_OK;
}

void nd_rank_relative_spread(int n, int k, const double *member_e, int ref, double *sigma)
{
    for (int i = 0; i < n; i++) {
        if (k < 2 || i == ref) {
            sigma[i] = 0.0;
            continue;
        }
        double mean = 0.0;
        for (int j = 0; j < k; j++)
            mean += member_e[i * k + j] - member_e[ref * k + j];
        mean /= k;
        double ss = 0.0;
        for (int j = 0; j < k; j++) {
            double d = member_e[i * k + j] - member_e[ref * k + j] - mean;
            ss += d * d;
        }
        sigma[i] = sqrt(ss / (k - 1));
    }
}

int nd_rank_select(int n, const double *key, double window, int max_count, int *keep)
{
    if (n < 1)
        return 0;
    nd_rank_order(n, key, keep);
    double lowest = key[keep[0]];
    int m = 0;
    for (int r = 0; r < n; r++) {
        if (window >= 0.0 && key[keep[r]] - lowest > window)
            break;
        if (max_count > 0 && m == max_count)
            break;
        keep[m++] = keep[r];
    }
    return m;
}
