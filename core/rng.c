#include "core/rng.h"

#include <math.h>

static uint64_t splitmix64(uint64_t *x)
{
    uint64_t z = (*x += 0x9e3779b97f4a7c15ULL);
    z = (z ^ (z >> 30)) * 0xbf58476d1ce4e5b9ULL;
    z = (z ^ (z >> 27)) * 0x94d049bb133111ebULL;
    return z ^ (z >> 31);
}

void nd_rng_seed(nd_rng *r, uint64_t seed)
{
    uint64_t x = seed;
    for (int i = 0; i < 4; i++)
        r->s[i] = splitmix64(&x);
}

void nd_rng_stream(nd_rng *r, uint64_t seed, uint64_t index)
{
    uint64_t x = seed;
    uint64_t mixed = splitmix64(&x) ^ (index * 0xd1342543de82ef95ULL + 0x632be59bd9b4e019ULL);
    nd_rng_seed(r, mixed);
}

static inline uint64_t rotl(uint64_t x, int k)
{
    return (x << k) | (x >> (64 - k));
}

uint64_t nd_rng_next(nd_rng *r)
{
    uint64_t *s = r->s;
    uint64_t result = rotl(s[1] * 5, 7) * 9;
    uint64_t t = s[1] << 17;
    s[2] ^= s[0];
    s[3] ^= s[1];
    s[1] ^= s[2];
    s[0] ^= s[3];
    s[2] ^= t;
    s[3] = rotl(s[3], 45);
    return result;
}

double nd_rng_uniform(nd_rng *r)
{
    return (double)(nd_rng_next(r) >> 11) * 0x1.0p-53;
}

uint64_t nd_rng_below(nd_rng *r, uint64_t n)
{
    uint64_t limit = UINT64_MAX - UINT64_MAX % n;
    uint64_t v;
    do
        v = nd_rng_next(r);
    while (v >= limit);
    return v % n;
}

double nd_rng_normal(nd_rng *r)
{
    double u1 = 1.0 - nd_rng_uniform(r); /* (0, 1]: log is finite */
    double u2 = nd_rng_uniform(r);
    return sqrt(-2.0 * log(u1)) * cos(2.0 * M_PI * u2);
}
