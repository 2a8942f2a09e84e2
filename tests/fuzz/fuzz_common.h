/* Shared body of the reader fuzzers: feed the bytes to a reader through
 * nd_reader_open_memory, read every record, and for each good one check
 * that writing it and reading it back gives the same molecule (within the
 * writer's precision). Any crash, sanitizer report or trap is a finding. */
#ifndef ND_FUZZ_COMMON_H
#define ND_FUZZ_COMMON_H

#include "core/format.h"
#include "core/numeric.h"
#include "core/sdf.h"
#include "core/xyz.h"

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

/* 1 if two titles are equal (NULL and "" alike). */
static int same_title(const char *a, const char *b)
{
    return strcmp(a ? a : "", b ? b : "") == 0;
}

/* Writes m with the writer of fmt and reads it back; traps on mismatch.
 * Called with both formats for every record read, whatever its source. */
static void fuzz_round_trip(nd_format fmt, const nd_molecule *m)
{
    char *buf = NULL;
    size_t len = 0;
    FILE *f = open_memstream(&buf, &len);
    if (!f)
        return;
    int s = fmt == ND_FORMAT_XYZ ? nd_xyz_write(f, m, NULL) : nd_sdf_write(f, m, NULL);
    fclose(f);
    if (s == ND_OK) {
        nd_reader *r;
        nd_molecule back;
        nd_molecule_init(&back);
        if (nd_reader_open_memory(&r, NULL, buf, len, fmt, NULL) != ND_OK)
            __builtin_trap();
        if (nd_reader_next(r, &back, NULL) != ND_OK)
            __builtin_trap(); /* what we write, we must read */
        if (back.natoms != m->natoms || !same_title(back.title, m->title))
            __builtin_trap();
        if (fmt == ND_FORMAT_SDF && (back.nbonds != m->nbonds || back.ndata != m->ndata))
            __builtin_trap();
        for (int d = 0; fmt == ND_FORMAT_SDF && d < m->ndata; d++)
            if (strcmp(back.data[d].name, m->data[d].name) || strcmp(back.data[d].value, m->data[d].value))
                __builtin_trap();
        double tol = fmt == ND_FORMAT_XYZ ? 0.0 : 5.0001e-5;
        for (int i = 0; i < m->natoms; i++) {
            if (back.z[i] != m->z[i])
                __builtin_trap();
            for (int k = 0; k < 3; k++)
                if (!(fabs(back.xyz[3 * i + k] - m->xyz[3 * i + k]) <= tol * nd_larger(1.0, fabs(m->xyz[3 * i + k]))))
                    __builtin_trap();
            if (fmt == ND_FORMAT_SDF &&
                (back.formal_charge[i] != m->formal_charge[i] || back.isotope[i] != m->isotope[i]))
                __builtin_trap();
        }
        nd_molecule_free(&back);
        nd_reader_close(r);
    }
    free(buf);
}

static int fuzz_one(nd_format fmt, const uint8_t *data, size_t size)
{
    nd_reader *r;
    if (nd_reader_open_memory(&r, fmt == ND_FORMAT_XYZ ? "fuzz.xyz" : "fuzz.sdf", data, size, fmt,
                              NULL) != ND_OK)
        return 0;
    nd_molecule m;
    nd_molecule_init(&m);
    nd_error err;
    int s;
    long guard = 0;
    while ((s = nd_reader_next(r, &m, &err)) == ND_OK || s == ND_EINPUT) {
        if (s == ND_OK) {
            fuzz_round_trip(ND_FORMAT_XYZ, &m);
            fuzz_round_trip(ND_FORMAT_SDF, &m);
        }
        else if (!strstr(err.msg, "line "))
            __builtin_trap(); /* every input error names its line */
        if (++guard > 10 * (long)size + 10)
            __builtin_trap(); /* the reader must make progress */
    }
    nd_molecule_free(&m);
    nd_reader_close(r);
    return 0;
}

#endif
