/* Runs scipy.optimize's L-BFGS-B (Debian python3-scipy) on an nd_energy, for
 * side-by-side comparisons in tests and benchmarks: the Python helper
 * tests/reference/helpers/scipy_lbfgsb.py drives the minimisation and asks
 * this process for every energy and gradient, so both methods minimise the
 * very same C function and their force calls are counted alike. The run
 * stops at the first point whose largest atomic force is <= max_force (the
 * test nadir's minimisers use). Test support only; not thread-safe. */
#ifndef ND_TEST_SCIPY_BRIDGE_H
#define ND_TEST_SCIPY_BRIDGE_H

#include "core/energy.h"

typedef struct nd_test_scipy_result {
    int converged;   /* 1 if a point with largest force <= max_force was reached */
    int force_calls; /* energy+gradient evaluations scipy asked for */
    double energy;   /* at the returned point */
    double max_force;
} nd_test_scipy_result;

/* 1 if /usr/bin/python3 with scipy and the helper script can be run from
 * the current directory (the repository root, as tests/run and bench/run.sh
 * arrange). */
int nd_test_scipy_available(void);

/* Minimises from x (3n, overwritten with scipy's end point) with memory
 * correction pairs and at most max_iter iterations. Returns 0 on success,
 * -1 if the helper could not be run or answered nonsense. */
int nd_test_scipy_lbfgsb(const nd_energy *pot, int n, double *x, double max_force, int memory,
                         int max_iter, nd_test_scipy_result *res);

#endif
