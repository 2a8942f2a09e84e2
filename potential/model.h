/* Learned-potential models: construction, files, domain checks.
 *
 * A model holds the descriptor parameters, one network per element (layer
 * sizes shared by all elements), per-feature input scaling, per-element
 * energy offsets, and an ensemble of K members that share the descriptor.
 * It is immutable once built or loaded, so one model can serve any number
 * of threads. The maths is in network.h and descriptor.h.
 *
 * Model file (our own format, version 1), in this byte order:
 *   1. the line "nadir-model 1\n" (the number is the format version);
 *   2. one JSON object (the header, UTF-8) followed by "\n": format,
 *      elements, neutral_only, descriptor parameters, network (hidden
 *      widths, activation, members), weights (count, encoding, order) and
 *      provenance (free-form object: reference method, dataset size, date,
 *      accuracy figures, ...);
 *   3. the weights: count IEEE-754 binary64 values, little-endian, in the
 *      parameter order of network.h (so doubles round-trip exactly);
 *   4. the line "\nchecksum fnv1a64 XXXXXXXXXXXXXXXX\n": 16 lowercase hex
 *      digits of the 64-bit FNV-1a hash (Fowler, Noll, Vo; IETF draft
 *      draft-eastlake-fnv) of every byte before this line.
 * Anything else (other magic, other version, short payload, trailing
 * bytes, checksum mismatch, inconsistent header) is rejected with a
 * message naming the file and what was wrong. */
#ifndef ND_MODEL_H
#define ND_MODEL_H

#include "core/molecule.h"
#include "core/status.h"
#include "potential/descriptor.h"

#include <stddef.h>
#include <stdint.h>

typedef struct nd_model nd_model;

#define ND_MODEL_FORMAT_VERSION 1
#define ND_MODEL_SPEC_MAX_ELEMENTS 16
#define ND_MODEL_SPEC_MAX_HIDDEN 6

/* What a new model looks like: plain data. */
typedef struct nd_model_spec {
    int nelements;
    int z[ND_MODEL_SPEC_MAX_ELEMENTS];  /* distinct atomic numbers, any order */
    nd_descriptor_params descriptor;
    int nhidden;                        /* hidden layers, 1 .. ND_MODEL_SPEC_MAX_HIDDEN */
    int hidden[ND_MODEL_SPEC_MAX_HIDDEN];
    int members;                        /* ensemble size K, 1 .. 64 */
    int neutral_only;                   /* 1: only neutral molecules */
} nd_model_spec;

/* Our defaults: H, C, N, O, F, S, Cl; nd_descriptor_defaults (210
 * features); hidden layers 96 and 64 (the 200-96-64-1 budget network of
 * POTENTIAL.md); 4 members; neutral molecules only. */
void nd_model_spec_defaults(nd_model_spec *s);

/* A new model from spec with seeded random weights: W ~ N(0, 1/fan_in)
 * (common practice, no source), hidden biases ~ N(0, 0.01), output layer
 * scaled by 0.1; input scaling mu = 0, scale = 1; offsets 0. Member k draws
 * from nd_rng_stream(seed, k), so members differ and the result does not
 * depend on anything but (spec, seed). *out is freed with nd_model_free. */
int nd_model_new(nd_model **out, const nd_model_spec *spec, uint64_t seed, nd_error *err);

/* A copy of m whose descriptor is p, a superset of m's: the same cutoffs,
 * every radial function and angular set of m (equal parameters, any order)
 * and more. The features m knows keep their scaling and weights; the new
 * ones get zero first-layer weights (mu 0, scale 1 until the caller fits
 * them), so the copy's energies equal m's and training can then learn what
 * the new features add. is_new (NULL, or room for the new descriptor size)
 * marks the new features. ND_EINPUT naming what p lacks or changes. */
int nd_model_widen(nd_model **out, const nd_model *m, const nd_descriptor_params *p,
                   unsigned char *is_new, nd_error *err);

/* Reads a model file (format above). *out is freed with nd_model_free.
 * ND_EIO if unreadable, ND_EINPUT (naming path) if not a valid model file. */
int nd_model_load(const char *path, nd_model **out, nd_error *err);

/* Writes m to path (temporary name in the same directory, then rename). */
int nd_model_save(const nd_model *m, const char *path, nd_error *err);

/* Frees m; accepts NULL. */
void nd_model_free(nd_model *m);

/* Deep copy (for a trainer that keeps a best-so-far model). */
int nd_model_copy(nd_model **out, const nd_model *m, nd_error *err);

/* Read-only accessors. */
int nd_model_elements(const nd_model *m, const int **z);     /* count; *z: atomic numbers, ascending */
double nd_model_cutoff(const nd_model *m);                    /* largest cutoff, angstrom */
int nd_model_members(const nd_model *m);                      /* ensemble size K */
int nd_model_features(const nd_model *m);                     /* descriptor size D */
int nd_model_neutral_only(const nd_model *m);
const nd_descriptor_params *nd_model_descriptor(const nd_model *m);
size_t nd_model_parameter_count(const nd_model *m);
const char *nd_model_provenance(const nd_model *m);           /* JSON object text, owned by m */

/* Replaces the provenance (must be a JSON object; copied). ND_EINPUT otherwise. */
int nd_model_set_provenance(nd_model *m, const char *json, nd_error *err);

/* Writes "H, C, N, O; neutral molecules only" (the model's domain) into
 * buf of size bytes. */
void nd_model_domain(const nd_model *m, char *buf, int size);

/* Domain check of n atoms with atomic numbers z and total charge: ND_EDOMAIN
 * naming the first atom whose element the model does not cover (1-based
 * index and symbol) or the charge, and the model's domain. */
int nd_model_check_atoms(const nd_model *m, int n, const int *z, int charge, nd_error *err);

/* The same for a molecule (total charge: mol->charge, or the sum of formal
 * charges when that is non-zero and mol->charge is 0); a model for neutral
 * molecules also refuses an odd electron count or a multiplicity above 1
 * (it learned closed-shell molecules). */
int nd_model_check(const nd_model *m, const nd_molecule *mol, nd_error *err);

/* 64-bit FNV-1a hash of n bytes, continuing from h (start with
 * ND_FNV1A64_INIT). Used for the model file checksum. */
#define ND_FNV1A64_INIT UINT64_C(0xcbf29ce484222325)
uint64_t nd_model_fnv1a64(uint64_t h, const void *data, size_t n);

#endif
