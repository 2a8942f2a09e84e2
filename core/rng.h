/* Seeded pseudo-random numbers: xoshiro256** (D. Blackman and S. Vigna,
 * "Scrambled linear pseudorandom number generators", ACM TOMS 47, 2021),
 * seeded through splitmix64. Every random choice in nadir comes from one of
 * these, passed in by the caller, so a seed fixes the output bit for bit. */
#ifndef ND_RNG_H
#define ND_RNG_H

#include <stdint.h>

typedef struct nd_rng {
    uint64_t s[4];
} nd_rng;

/* Seeds r from a 64-bit seed. */
void nd_rng_seed(nd_rng *r, uint64_t seed);

/* An independent stream for work item `index` (a structure, a thread, an
 * ensemble member) derived from seed: same (seed, index), same stream, no
 * matter which thread runs it. */
void nd_rng_stream(nd_rng *r, uint64_t seed, uint64_t index);

uint64_t nd_rng_next(nd_rng *r);

/* Uniform double in [0, 1) with 53 random bits. */
double nd_rng_uniform(nd_rng *r);

/* Uniform integer in [0, n), n > 0, without modulo bias. */
uint64_t nd_rng_below(nd_rng *r, uint64_t n);

/* Standard normal deviate (Box-Muller; both values are used in turn would
 * need state, so each call draws two uniforms and returns one value). */
double nd_rng_normal(nd_rng *r);

#endif
