#include "core/xyz.h"

#include "core/elements.h"
#include "core/report.h"

#include <ctype.h>
#include <errno.h>
#include <limits.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>
#include <strings.h>

/* Splits s (modified in place) into at most max whitespace-separated tokens;
 * returns how many there were in total (may exceed max). */
static int split(char *s, char **tok, int max)
{
    int n = 0;
    char *p = s;
    for (;;) {
        while (*p == ' ' || *p == '\t' || *p == '\v' || *p == '\f')
            p++;
        if (!*p)
            break;
        char *start = p;
        while (*p && *p != ' ' && *p != '\t' && *p != '\v' && *p != '\f')
            p++;
        if (n < max)
            tok[n] = start;
        n++;
        if (*p)
            *p++ = '\0';
    }
    return n;
}

/* 1 if s is only whitespace. */
static int blank(const char *s)
{
    for (; *s; s++)
        if (!isspace((unsigned char)*s))
            return 0;
    return 1;
}

/* Parses a decimal integer of digits only (optional leading '+'); returns 0
 * and *out, or -1 if s is not one or overflows long. */
static int parse_count(const char *s, long *out)
{
    const char *p = s;
    if (*p == '+')
        p++;
    if (!isdigit((unsigned char)*p))
        return -1;
    long v = 0;
    for (; *p; p++) {
        if (!isdigit((unsigned char)*p))
            return -1;
        if (v > (LONG_MAX - 9) / 10)
            return -1;
        v = 10 * v + (*p - '0');
    }
    *out = v;
    return 0;
}

/* 1 if line (not modified) is a lone non-negative integer with optional
 * surrounding whitespace: the shape of an XYZ count line. */
static int is_count_line(const char *line)
{
    const char *p = line;
    while (isspace((unsigned char)*p))
        p++;
    if (*p == '+')
        p++;
    if (!isdigit((unsigned char)*p))
        return 0;
    while (isdigit((unsigned char)*p))
        p++;
    return blank(p);
}

/* Atomic number from an XYZ element token: a symbol in any case or an
 * atomic number. 0 if unknown. */
static int element_of(const char *tok)
{
    if (isdigit((unsigned char)tok[0])) {
        long z;
        if (parse_count(tok, &z) != 0 || z < 1 || z > ND_MAX_Z)
            return 0;
        return (int)z;
    }
    size_t n = strlen(tok);
    if (n < 1 || n > 2)
        return 0;
    return nd_element_from_symbol_anycase(tok, (int)n);
}

/* Skips lines until one that looks like a count line (left unread) or the
 * end. Returns ND_OK, or ND_EIO/ND_ENOMEM (final errors). */
static int resync(nd_lines *l, nd_error *err)
{
    nd_error tmp;
    for (;;) {
        int s = nd_lines_next(l, &tmp);
        if (s == ND_END)
            return ND_OK;
        if (s == ND_EINPUT)
            continue;
        if (s != ND_OK) {
            if (err)
                *err = tmp;
            return s;
        }
        if (is_count_line(l->buf)) {
            nd_lines_unread(l);
            return ND_OK;
        }
    }
}

/* Parses one atom line (modified in place) into the molecule. Returns
 * ND_OK, ND_EINPUT with a message, or ND_ENOMEM. */
static int parse_atom(nd_lines *l, nd_molecule *mol, int i, int n, nd_error *err)
{
    long line = l->lineno;
    char *tok[4];
    int nt = split(l->buf, tok, 4);
    if (nt < 4)
        return nd_lines_fail(l, err, ND_EINPUT, line,
                             "atom %d of %d: found %d field%s; expected an element and x y z", i + 1,
                             n, nt, nt == 1 ? "" : "s");
    int z = element_of(tok[0]);
    if (z == 0)
        return nd_lines_fail(l, err, ND_EINPUT, line,
                             "atom %d of %d: unknown element '%.20s'; expected an element symbol "
                             "(H to Xe) or an atomic number 1..%d",
                             i + 1, n, tok[0], ND_MAX_Z);
    double x[3];
    static const char axis[3] = {'x', 'y', 'z'};
    for (int k = 0; k < 3; k++) {
        int s = nd_text_double(tok[1 + k], &x[k]);
        if (s == -1)
            return nd_lines_fail(l, err, ND_EINPUT, line,
                                 "atom %d of %d: %c coordinate '%.30s' is not a number", i + 1, n,
                                 axis[k], tok[1 + k]);
        if (s == -2)
            return nd_lines_fail(l, err, ND_EINPUT, line,
                                 "atom %d of %d: %c coordinate '%.30s' is not finite; expected a "
                                 "finite number in angstrom",
                                 i + 1, n, axis[k], tok[1 + k]);
    }
    return nd_molecule_add_atom(mol, z, x[0], x[1], x[2], err);
}

int nd_xyz_read(nd_lines *l, nd_molecule *mol, nd_error *err)
{
    nd_molecule_clear(mol);
    int s;
    /* the count line, after any blank lines; the frame number is counted
     * up front so messages name the frame being begun */
    l->record++;
    for (;;) {
        s = nd_lines_next(l, err);
        if (s == ND_END) {
            l->record--;
            return ND_END;
        }
        if (s == ND_EINPUT) {
            int r = resync(l, NULL);
            return r == ND_OK ? ND_EINPUT : r;
        }
        if (s != ND_OK)
            return s;
        if (!blank(l->buf))
            break;
    }
    long count_line = l->lineno;
    char *tok[2];
    char copy[64];
    snprintf(copy, sizeof copy, "%s", l->buf);
    int nt = split(l->buf, tok, 2);
    long n = 0;
    if (nt != 1 || parse_count(tok[0], &n) != 0) {
        nd_lines_fail(l, err, ND_EINPUT, count_line,
                      "expected the atom count (a positive integer alone on the line), found '%.40s'",
                      copy);
        int r = resync(l, err);
        return r == ND_OK ? ND_EINPUT : r;
    }
    if (n < 1 || n > ND_XYZ_MAX_ATOMS) {
        nd_lines_fail(l, err, ND_EINPUT, count_line, "atom count %ld; expected 1..%d", n,
                      ND_XYZ_MAX_ATOMS);
        int r = resync(l, err);
        return r == ND_OK ? ND_EINPUT : r;
    }
    int natoms = (int)n;
    /* the comment line: the title */
    s = nd_lines_next(l, err);
    if (s == ND_END)
        return nd_lines_fail(l, err, ND_EINPUT, count_line,
                             "input ends after the count line; expected a comment line and %d "
                             "atom line%s",
                             natoms, natoms == 1 ? "" : "s");
    if (s == ND_EINPUT) {
        int r = resync(l, err);
        return r == ND_OK ? ND_EINPUT : r;
    }
    if (s != ND_OK)
        return s;
    {
        size_t k = l->len;
        while (k > 0 && isspace((unsigned char)l->buf[k - 1]))
            l->buf[--k] = '\0';
        char *t = l->buf; /* leading blanks are kept, as the SD reader keeps them */
        for (char *c = t; *c; c++)
            if (*c == '\r')
                *c = ' '; /* a stray carriage return inside the line */
        if (*t && nd_molecule_set_title(mol, t, err) != ND_OK)
            return ND_ENOMEM;
    }
    /* the atom lines; after the first bad one, the rest of the frame is
     * consumed so the next frame can be read */
    int failed = 0;
    for (int i = 0; i < natoms; i++) {
        s = nd_lines_next(l, failed ? NULL : err);
        if (s == ND_END) {
            if (failed)
                return ND_EINPUT;
            return nd_lines_fail(l, err, ND_EINPUT, l->lineno,
                                 "input ends after %d of %d atom lines; expected %d more", i, natoms,
                                 natoms - i);
        }
        if (s == ND_EINPUT) {
            failed = 1;
            continue;
        }
        if (s != ND_OK)
            return s;
        if (is_count_line(l->buf)) {
            if (!failed)
                nd_lines_fail(l, err, ND_EINPUT, l->lineno,
                              "found a lone number where atom %d of %d was expected; the frame "
                              "has fewer atom lines than its count says",
                              i + 1, natoms);
            nd_lines_unread(l);
            return ND_EINPUT;
        }
        if (blank(l->buf)) {
            if (!failed)
                nd_lines_fail(l, err, ND_EINPUT, l->lineno,
                              "blank line where atom %d of %d was expected; the frame has fewer "
                              "atom lines than its count says",
                              i + 1, natoms);
            int r = resync(l, NULL);
            return r == ND_OK ? ND_EINPUT : r;
        }
        if (failed)
            continue;
        s = parse_atom(l, mol, i, natoms, err);
        if (s == ND_ENOMEM)
            return s;
        if (s != ND_OK)
            failed = 1;
    }
    if (failed)
        return ND_EINPUT;
    mol->dimension = 3;
    mol->charge = 0;
    return ND_OK;
}

char *nd_xyz_format_double(double v, char *buf)
{
    /* six decimals when they are exact (aligned columns, as usual in XYZ) */
    snprintf(buf, 32, "%.6f", v);
    if (strtod(buf, NULL) == v && (v != 0.0 || !signbit(v)))
        return buf;
    return nd_report_exact(v, buf);
}

int nd_xyz_write(FILE *f, const nd_molecule *mol, nd_error *err)
{
    if (mol->natoms == 0)
        return nd_fail(err, ND_EINPUT, "molecule '%.60s' has no atoms; an XYZ frame needs at least one",
                       mol->title ? mol->title : "");
    if (mol->dimension == 0)
        return nd_fail(err, ND_EINPUT,
                       "molecule '%.60s' has no coordinates; XYZ needs 3D coordinates (make "
                       "them with nadir build)",
                       mol->title ? mol->title : "");
    for (int i = 0; i < mol->natoms; i++) {
        if (mol->z[i] < 1 || mol->z[i] > ND_MAX_Z)
            return nd_fail(err, ND_EINPUT, "atom %d has atomic number %d, outside 1..%d", i + 1,
                           mol->z[i], ND_MAX_Z);
        for (int k = 0; k < 3; k++)
            if (!isfinite(mol->xyz[3 * i + k]))
                return nd_fail(err, ND_EINPUT, "atom %d has a non-finite coordinate", i + 1);
    }
    fprintf(f, "%d\n", mol->natoms);
    if (mol->title)
        for (const char *c = mol->title; *c; c++)
            putc(*c == '\n' || *c == '\r' ? ' ' : *c, f);
    putc('\n', f);
    for (int i = 0; i < mol->natoms; i++) {
        char a[32], b[32], c[32];
        fprintf(f, "%-2s %14s %14s %14s\n", nd_element_symbol(mol->z[i]),
                nd_xyz_format_double(mol->xyz[3 * i], a),
                nd_xyz_format_double(mol->xyz[3 * i + 1], b),
                nd_xyz_format_double(mol->xyz[3 * i + 2], c));
    }
    if (ferror(f))
        return nd_fail(err, ND_EIO, "write error: %s", strerror(errno));
    return ND_OK;
}
