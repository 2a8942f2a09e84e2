#include "core/energy.h"

#include "core/status.h"

#include <stddef.h>

int nd_energy_batch(const nd_energy *pot, int n, int m, const double *x, double *energy, double *g)
{
    if (pot->batch)
        return pot->batch(pot->ctx, n, m, x, energy, g);
    int status = ND_OK, first = m; /* report the lowest failing index: deterministic */
    size_t stride = 3 * (size_t)n;
#pragma omp parallel for schedule(dynamic) if (m > 1)
    for (int k = 0; k < m; k++) {
        int s = pot->fn(pot->ctx, n, x + (size_t)k * stride, &energy[k], g ? g + (size_t)k * stride : NULL);
        if (s != ND_OK) {
#pragma omp critical(nd_energy_batch_status)
            if (k < first) {
                first = k;
                status = s;
            }
        }
    }
    return status;
}
