/* Reference datasets: structures with energies and forces, stored as JSON
 * Lines, read into memory for training and evaluation, appended to by the
 * labelling command.
 *
 * File format (one JSON object per line, UTF-8, lines end in '\n'):
 *
 *   {"dataset": "nadir", "version": 1, "energy_unit": "kcal/mol", "length_unit": "angstrom"}
 *   {"key": "mol-0007", "elements": ["O", "H", "H"],
 *    "coordinates": [0.0, 0.0, 0.117, 0.0, 0.757, -0.469, 0.0, -0.757, -0.469],
 *    "energy": -3181.6, "forces": [ ... 9 numbers ... ],
 *    "charge": 0, "multiplicity": 1, "id": "3f9a0c51d2e877a4",
 *    "source": "xtb-single-point", "tag": "relaxation path"}
 *
 * - The first line may be a header object (it has a "dataset" member and no
 *   "elements"). Its "energy_unit" and "length_unit" are the units of every
 *   line below; without a header they are kcal/mol and angstrom. A
 *   "version" other than 1 is refused.
 * - A structure line may carry its own "energy_unit" / "length_unit", which
 *   override the header for that line only.
 * - Energy units: "kcal/mol", "kJ/mol", "hartree", "eV". Length units:
 *   "angstrom", "bohr". Forces are in energy unit per length unit. Reading
 *   converts everything to kcal/mol, angstrom and kcal/mol/angstrom with the
 *   CODATA 2018 factors of core/units.h.
 * - "coordinates" and "forces" are either 3n numbers (x0 y0 z0 x1 ...) or n
 *   arrays of three; the writer uses the flat form.
 * - Required: "key" (the molecule: structures of one molecule share it),
 *   "elements", "coordinates", "energy". Optional: "forces" (absent, or null,
 *   on lines without them), "charge" (default 0), "multiplicity" (default
 *   1), "id" (16 hexadecimal digits; computed with nd_dataset_hash when
 *   absent), "source", "tag". Other members are ignored.
 * - Blank lines are ignored.
 *
 * Loading a large file: the text is parsed in parallel (OpenMP) by a strict
 * JSON reader of our own that converts numbers straight into place; the result
 * can be kept in a binary cache file next to the dataset (PATH.cache), which
 * is used only when the dataset's size, modification time and a 64-bit hash
 * of its whole content all match the ones recorded in the cache. */
#ifndef ND_DATASET_H
#define ND_DATASET_H

#include "core/status.h"

#include <stdint.h>
#include <stdio.h>

/* One structure, as a view into a loaded dataset (pointers owned by the
 * dataset, valid until nd_dataset_free), or as the caller's data for the
 * writer. */
typedef struct nd_dataset_entry {
    int natoms;
    const int *z;          /* natoms atomic numbers */
    const double *xyz;     /* 3 * natoms coordinates, angstrom */
    double energy;         /* kcal/mol */
    const double *forces;  /* 3 * natoms, kcal/mol/angstrom, or NULL when absent */
    int charge;            /* total charge */
    int multiplicity;      /* spin multiplicity */
    const char *key;       /* molecule key, never NULL in a loaded dataset */
    const char *source;    /* or NULL */
    const char *tag;       /* or NULL */
    uint64_t id;           /* structure hash (see nd_dataset_hash) */
} nd_dataset_entry;

/* Flags for nd_dataset_load. */
enum {
    ND_DATASET_SKIP_BAD = 1,  /* skip bad lines and count them; default: the first is fatal */
    ND_DATASET_CACHE = 2      /* use a valid cache, and write one after parsing the text */
};

/* What a load did, for the caller to report. */
typedef struct nd_dataset_report {
    long lines;           /* lines read, including the header and blank lines */
    long structures;      /* structures loaded */
    long bad_lines;       /* lines skipped (only with ND_DATASET_SKIP_BAD) */
    long first_bad_line;  /* 1-based number of the first bad line, 0 if none */
    char first_bad[ND_ERROR_MSG_MAX]; /* its message */
    int cache_used;       /* 1 if the structures came from the cache */
    int cache_written;    /* 1 if a new cache was written */
    int truncated_tail;   /* 1 if the last line had no '\n' (an interrupted write) and was ignored */
} nd_dataset_report;

typedef struct nd_dataset nd_dataset;

/* Reads the JSON Lines dataset at path into memory. flags are ND_DATASET_*;
 * rep (may be NULL) receives counts. A bad line (not JSON, a required member
 * missing, NaN or infinite numbers, a coordinate count that is not 3 per
 * element, an unknown element or unit) is an ND_EINPUT error
 * "PATH, line N: reason", unless ND_DATASET_SKIP_BAD is set, in which case it
 * is counted and skipped. A last line without its '\n' is treated as an
 * interrupted write: ignored and flagged in rep->truncated_tail, not an
 * error. *out is freed with nd_dataset_free. */
int nd_dataset_load(nd_dataset **out, const char *path, int flags, nd_dataset_report *rep,
                    nd_error *err);

/* Frees a dataset; accepts NULL. Entry views into it become invalid. */
void nd_dataset_free(nd_dataset *d);

/* Number of structures. */
long nd_dataset_count(const nd_dataset *d);

/* Total number of atoms over all structures. */
long nd_dataset_atoms(const nd_dataset *d);

/* Fills *e with a view of structure i (0 <= i < count). */
void nd_dataset_get(const nd_dataset *d, long i, nd_dataset_entry *e);

/* Number of distinct molecule keys, and the index (0 .. nkeys-1, in order of
 * first appearance) of the key of structure i, for splitting by molecule. */
int nd_dataset_key_count(const nd_dataset *d);
int nd_dataset_key_index(const nd_dataset *d, long i);

/* Name of key k. Owned by d. */
const char *nd_dataset_key_name(const nd_dataset *d, int k);

/* 1 if some structure has id (binary search over a sorted copy). */
int nd_dataset_has_id(const nd_dataset *d, uint64_t id);

/* Identity of a structure: a 64-bit hash of the atom count, the atomic
 * numbers, the exact bits of the coordinates (with -0.0 taken as 0.0), the
 * charge and the multiplicity. The same input read twice gives the same
 * hash, so it identifies structures across runs. */
uint64_t nd_dataset_hash(int natoms, const int *z, const double *xyz, int charge, int multiplicity);

/* Writes id as 16 lowercase hexadecimal digits plus NUL into buf[17]. */
void nd_dataset_format_id(uint64_t id, char buf[17]);

/* Appends structures to a dataset, one line each, flushed after every line
 * so that a killed process leaves only whole lines plus at most one partial
 * last line. */
typedef struct nd_dataset_writer nd_dataset_writer;

/* Opens path for appending (created if absent). A new or empty file gets
 * the header line (kcal/mol, angstrom). If the file ends in a partial line
 * (no final '\n', from an interrupted write), that line is cut off first;
 * *dropped (may be NULL) receives the number of bytes removed. A non-empty
 * file whose header declares other units is refused (ND_EINPUT), since the
 * writer writes kcal/mol and angstrom. Free with nd_dataset_writer_close. */
int nd_dataset_writer_open(nd_dataset_writer **out, const char *path, long *dropped, nd_error *err);

/* Appends one structure (units of nd_dataset_entry) and flushes. key must be
 * a non-empty string; source and tag may be NULL. Non-finite numbers are
 * refused (ND_EINPUT) and nothing is written. */
int nd_dataset_writer_append(nd_dataset_writer *w, const nd_dataset_entry *e, nd_error *err);

/* Closes the file. Returns ND_EIO if the final close failed. Accepts NULL. */
int nd_dataset_writer_close(nd_dataset_writer *w, nd_error *err);

/* Formats one structure as a dataset line (with the '\n') into a malloc'd
 * string the caller frees; NULL on a non-finite number or no memory (err
 * says which). Shared by the writer and by tools that print lines. */
char *nd_dataset_format_line(const nd_dataset_entry *e, nd_error *err);

#endif
