/* Small numeric helpers shared across modules. */
#ifndef ND_NUMERIC_H
#define ND_NUMERIC_H

#include <math.h>

/* The larger of a and b; a NaN argument is ignored in favour of the other
 * (the same rule as C99's maximum function, so comparisons stay total when
 * one side is missing). */
static inline double nd_larger(double a, double b)
{
    if (isnan(a))
        return b;
    if (isnan(b))
        return a;
    return a > b ? a : b;
}

#endif
