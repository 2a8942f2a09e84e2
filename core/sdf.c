#include "core/sdf.h"

#include "core/elements.h"

#include <ctype.h>
#include <errno.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

/* ------------------------------------------------------------------ */
/* Small text helpers                                                  */

/* 1 if s is only whitespace. */
static int blank(const char *s)
{
    for (; *s; s++)
        if (!isspace((unsigned char)*s))
            return 0;
    return 1;
}

/* 1 if line is the record separator "$$$$" (trailing blanks allowed). */
static int is_separator(const char *line)
{
    return strncmp(line, "$$$$", 4) == 0 && blank(line + 4);
}

/* Copies columns [start, start + w) of line (0-based; a short line gives a
 * short field) into buf (at least w + 1 bytes), without surrounding blanks. */
static void field(const char *line, size_t len, size_t start, size_t w, char *buf)
{
    size_t n = 0;
    if (start < len) {
        size_t end = start + w < len ? start + w : len;
        for (size_t i = start; i < end; i++)
            buf[n++] = line[i];
    }
    buf[n] = '\0';
    while (n > 0 && isspace((unsigned char)buf[n - 1]))
        buf[--n] = '\0';
    size_t k = 0;
    while (buf[k] && isspace((unsigned char)buf[k]))
        k++;
    if (k)
        memmove(buf, buf + k, n - k + 1);
}

/* Integer in a fixed-column field; a blank field reads as 0. Returns 0, or
 * -1 if the field holds something that is not an integer. */
static int field_int(const char *line, size_t len, size_t start, size_t w, long *out)
{
    char buf[32];
    if (w >= sizeof buf)
        return -1;
    field(line, len, start, w, buf);
    if (!buf[0]) {
        *out = 0;
        return 0;
    }
    return nd_text_long(buf, out);
}

/* Splits s (modified) at whitespace into at most max tokens; returns the
 * total number of tokens found. */
static int split(char *s, char **tok, int max)
{
    int n = 0;
    char *p = s;
    for (;;) {
        while (*p && isspace((unsigned char)*p))
            p++;
        if (!*p)
            break;
        char *start = p;
        while (*p && !isspace((unsigned char)*p))
            p++;
        if (n < max)
            tok[n] = start;
        n++;
        if (*p)
            *p++ = '\0';
    }
    return n;
}

/* ------------------------------------------------------------------ */
/* Reader state                                                        */

typedef struct {
    nd_lines *l;
    int sep_seen;  /* the record's "$$$$" has been consumed */
    char *v30;     /* joined V3000 line (continuations) */
    size_t v30_cap;
    int charge_prop; /* an M  CHG or M  RAD line was seen */
    int iso_prop;    /* an M  ISO line was seen */
    int *block_charge, *block_iso, *block_rad; /* atom block values, until the properties decide */
    int *rad;        /* radical per atom: 0 none, 1 singlet, 2 doublet, 3 triplet (M  RAD codes) */
    int *bond_stereo;              /* stereo field per bond */
    long *bond_line;               /* line of each bond, for messages */
    int cap;                       /* allocated entries of the four arrays above */
} sd_state;

/* Grows the per-atom/per-bond scratch arrays to n entries. */
static int state_reserve(sd_state *st, int n)
{
    if (n <= st->cap)
        return ND_OK;
    size_t c = (size_t)n;
    int *a = realloc(st->block_charge, c * sizeof *a);
    if (a)
        st->block_charge = a;
    int *b = realloc(st->block_iso, c * sizeof *b);
    if (b)
        st->block_iso = b;
    int *s = realloc(st->bond_stereo, c * sizeof *s);
    if (s)
        st->bond_stereo = s;
    long *ln = realloc(st->bond_line, c * sizeof *ln);
    if (ln)
        st->bond_line = ln;
    int *br = realloc(st->block_rad, c * sizeof *br);
    if (br)
        st->block_rad = br;
    int *r = realloc(st->rad, c * sizeof *r);
    if (r)
        st->rad = r;
    if (!a || !b || !s || !ln || !br || !r)
        return ND_ENOMEM;
    st->cap = n;
    return ND_OK;
}

static void state_free(sd_state *st)
{
    free(st->v30);
    free(st->block_charge);
    free(st->block_iso);
    free(st->bond_stereo);
    free(st->bond_line);
    free(st->block_rad);
    free(st->rad);
}

/* Reads the next line of a record that must go on, where `what` (line k
 * of n when n > 0) was expected. The end of input and a "$$$$" line are ND_EINPUT here (the
 * record is truncated). */
static int rec_line_n(sd_state *st, nd_error *err, const char *what, int k, int n)
{
    nd_lines *l = st->l;
    int s = nd_lines_next(l, err);
    if (s == ND_OK && !is_separator(l->buf))
        return ND_OK;
    if (s != ND_OK && s != ND_END)
        return s;
    char buf[96]; /* formatted only on failure: this is the hot path */
    if (n > 0)
        snprintf(buf, sizeof buf, "%s %d of %d (the counts line's number)", what, k, n);
    else
        snprintf(buf, sizeof buf, "%s", what);
    if (s == ND_END)
        return nd_lines_fail(l, err, ND_EINPUT, l->lineno,
                             "input ends inside the record; expected %s", buf);
    st->sep_seen = 1;
    return nd_lines_fail(l, err, ND_EINPUT, l->lineno,
                         "record ends ('$$$$') too early; expected %s", buf);
}

/* rec_line_n for a line described by a fixed phrase. */
static int rec_line(sd_state *st, nd_error *err, const char *what)
{
    return rec_line_n(st, err, what, 0, 0);
}

/* Atomic number and isotope for an SD atom symbol: element symbols as
 * written ("Cl"), D and T for hydrogen isotopes. Returns 0 if unknown. */
static int sd_element(const char *sym, int *iso)
{
    *iso = 0;
    if (strcmp(sym, "D") == 0) {
        *iso = 2;
        return 1;
    }
    if (strcmp(sym, "T") == 0) {
        *iso = 3;
        return 1;
    }
    return nd_element_from_symbol(sym, -1);
}

/* Message for an atom symbol that is not an element we know. */
static int bad_symbol(nd_lines *l, nd_error *err, int i, const char *sym)
{
    static const char *query[] = {"A", "Q", "*", "L", "LP", "R#", "R", "X", "M", "AH", "QH", "XH", "MH"};
    for (size_t k = 0; k < sizeof query / sizeof query[0]; k++)
        if (strcmp(sym, query[k]) == 0)
            return nd_lines_fail(l, err, ND_EINPUT, l->lineno,
                                 "atom %d: '%s' is a query atom or atom list, not an element; "
                                 "expected a real element symbol",
                                 i + 1, sym);
    return nd_lines_fail(l, err, ND_EINPUT, l->lineno,
                         "atom %d: unknown element symbol '%.8s'; expected an element H to Xe "
                         "written as in the periodic table ('Cl', not 'CL')",
                         i + 1, sym);
}

/* Checks a parsed coordinate; nd_text_double's result r. */
static int check_coord(nd_lines *l, nd_error *err, int r, int i, char axis, const char *text)
{
    if (r == -1)
        return nd_lines_fail(l, err, ND_EINPUT, l->lineno,
                             "atom %d: %c coordinate '%.20s' is not a number", i + 1, axis, text);
    if (r == -2)
        return nd_lines_fail(l, err, ND_EINPUT, l->lineno,
                             "atom %d: %c coordinate '%.20s' is not finite; expected a finite "
                             "number in angstrom",
                             i + 1, axis, text);
    return ND_OK;
}

/* Adds a bond after checking its atoms and type; the message names the
 * current line. stereo is the bond's stereo field. */
static int add_bond(sd_state *st, nd_molecule *mol, int k, long a, long b, long type, long stereo,
                    nd_error *err)
{
    nd_lines *l = st->l;
    if (a < 1 || a > mol->natoms || b < 1 || b > mol->natoms)
        return nd_lines_fail(l, err, ND_EINPUT, l->lineno,
                             "bond %d joins atoms %ld and %ld; expected atom numbers 1..%d", k + 1,
                             a, b, mol->natoms);
    if (a == b)
        return nd_lines_fail(l, err, ND_EINPUT, l->lineno,
                             "bond %d joins atom %ld to itself; expected two different atoms",
                             k + 1, a);
    if (type < 1 || type > 4)
        return nd_lines_fail(l, err, ND_EINPUT, l->lineno,
                             "bond %d has type %ld; expected 1 (single), 2 (double), 3 (triple) or "
                             "4 (aromatic); query bond types 5-8 are not molecules",
                             k + 1, type);
    if (state_reserve(st, k + 1) != ND_OK ||
        nd_molecule_add_bond(mol, (int)a - 1, (int)b - 1, (int)type, err) != ND_OK)
        return nd_fail(err, ND_ENOMEM, "out of memory reading bond %d", k + 1);
    st->bond_stereo[k] = (int)stereo;
    st->bond_line[k] = l->lineno;
    return ND_OK;
}

typedef struct {
    int lo, hi, k;
} bond_key;

static int cmp_bond_key(const void *pa, const void *pb)
{
    const bond_key *a = pa, *b = pb;
    if (a->lo != b->lo)
        return a->lo < b->lo ? -1 : 1;
    if (a->hi != b->hi)
        return a->hi < b->hi ? -1 : 1;
    return a->k < b->k ? -1 : a->k > b->k;
}

/* Reports a bond listed twice (the same two atoms). */
static int check_duplicate_bonds(sd_state *st, const nd_molecule *mol, nd_error *err)
{
    if (mol->nbonds < 2)
        return ND_OK;
    bond_key *keys = malloc((size_t)mol->nbonds * sizeof *keys);
    if (!keys)
        return nd_fail(err, ND_ENOMEM, "out of memory checking bonds");
    for (int k = 0; k < mol->nbonds; k++) {
        int a = mol->bonds[k].a, b = mol->bonds[k].b;
        keys[k] = (bond_key){a < b ? a : b, a < b ? b : a, k};
    }
    qsort(keys, (size_t)mol->nbonds, sizeof *keys, cmp_bond_key);
    int status = ND_OK;
    for (int k = 1; k < mol->nbonds; k++)
        if (keys[k].lo == keys[k - 1].lo && keys[k].hi == keys[k - 1].hi) {
            int later = keys[k].k;
            status = nd_lines_fail(st->l, err, ND_EINPUT, st->bond_line[later],
                                   "bond %d joins atoms %d and %d again (bond %d already does); "
                                   "expected each pair once",
                                   later + 1, keys[k].lo + 1, keys[k].hi + 1, keys[k - 1].k + 1);
            break;
        }
    free(keys);
    return status;
}

/* ------------------------------------------------------------------ */
/* V2000 blocks                                                        */

/* Reads natoms V2000 atom lines. */
static int read_atoms_v2000(sd_state *st, nd_molecule *mol, int natoms, nd_error *err)
{
    nd_lines *l = st->l;
    if (state_reserve(st, natoms) != ND_OK)
        return nd_fail(err, ND_ENOMEM, "out of memory for %d atoms", natoms);
    for (int i = 0; i < natoms; i++) {
        int s = rec_line_n(st, err, "atom line", i + 1, natoms);
        if (s != ND_OK)
            return s;
        const char *ln = l->buf;
        size_t len = l->len;
        if (strncmp(ln, "M  ", 3) == 0 || ln[0] == '>')
            return nd_lines_fail(l, err, ND_EINPUT, l->lineno,
                                 "expected atom line %d of %d (the counts line's number), found "
                                 "'%.20s'; the atom block is shorter than the counts line says",
                                 i + 1, natoms, ln);
        if (len < 34)
            return nd_lines_fail(l, err, ND_EINPUT, l->lineno,
                                 "atom %d: line has %zu columns; expected at least 34 (x y z in "
                                 "columns 1-30, element symbol in 32-34)",
                                 i + 1, len);
        char buf[16];
        double x[3];
        static const char axis[3] = {'x', 'y', 'z'};
        for (int k = 0; k < 3; k++) {
            field(ln, len, (size_t)(10 * k), 10, buf);
            s = check_coord(l, err, nd_text_double(buf, &x[k]), i, axis[k], buf);
            if (s != ND_OK)
                return s;
        }
        field(ln, len, 31, 3, buf);
        int iso;
        int z = sd_element(buf, &iso);
        if (z == 0)
            return bad_symbol(l, err, i, buf);
        long dd, code;
        if (field_int(ln, len, 34, 2, &dd) != 0)
            return nd_lines_fail(l, err, ND_EINPUT, l->lineno,
                                 "atom %d: mass difference in columns 35-36 is not an integer", i + 1);
        if (field_int(ln, len, 36, 3, &code) != 0 || code < 0 || code > 7)
            return nd_lines_fail(l, err, ND_EINPUT, l->lineno,
                                 "atom %d: charge code in columns 37-39 must be 0..7 (3 = +1, 5 = "
                                 "-1, 4 = radical)",
                                 i + 1);
        if (nd_molecule_add_atom(mol, z, x[0], x[1], x[2], err) != ND_OK)
            return ND_ENOMEM;
        int q = (code == 0 || code == 4) ? 0 : 4 - (int)code;
        st->block_charge[i] = q;
        st->block_rad[i] = code == 4 ? 2 : 0; /* code 4: doublet radical */
        st->rad[i] = 0;
        if (dd != 0) {
            long a = lround(nd_element_mass(z)) + dd;
            if (dd < -3 || dd > 4 || a < z)
                return nd_lines_fail(l, err, ND_EINPUT, l->lineno,
                                     "atom %d: mass difference %ld; expected -3..+4", i + 1, dd);
            iso = (int)a;
        }
        st->block_iso[i] = iso;
    }
    return ND_OK;
}

/* Reads nbonds V2000 bond lines. */
static int read_bonds_v2000(sd_state *st, nd_molecule *mol, int nbonds, nd_error *err)
{
    nd_lines *l = st->l;
    if (state_reserve(st, nbonds) != ND_OK)
        return nd_fail(err, ND_ENOMEM, "out of memory for %d bonds", nbonds);
    for (int k = 0; k < nbonds; k++) {
        int s = rec_line_n(st, err, "bond line", k + 1, nbonds);
        if (s != ND_OK)
            return s;
        const char *ln = l->buf;
        size_t len = l->len;
        if (strncmp(ln, "M  ", 3) == 0 || ln[0] == '>')
            return nd_lines_fail(l, err, ND_EINPUT, l->lineno,
                                 "expected bond line %d of %d (the counts line's number), found "
                                 "'%.20s'; the bond block is shorter than the counts line says",
                                 k + 1, nbonds, ln);
        long a, b, t, stereo;
        if (len < 9 || field_int(ln, len, 0, 3, &a) != 0 || field_int(ln, len, 3, 3, &b) != 0 ||
            field_int(ln, len, 6, 3, &t) != 0 || field_int(ln, len, 9, 3, &stereo) != 0)
            return nd_lines_fail(l, err, ND_EINPUT, l->lineno,
                                 "bond %d: expected first atom, second atom, type and stereo in "
                                 "columns 1-3, 4-6, 7-9, 10-12, found '%.40s'",
                                 k + 1, ln);
        s = add_bond(st, mol, k, a, b, t, stereo, err);
        if (s != ND_OK)
            return s;
    }
    return ND_OK;
}

enum { PROP_CHG, PROP_ISO, PROP_RAD };

/* Parses an "M  CHG", "M  ISO" or "M  RAD" line (kind PROP_*): a count 1..8
 * then that many pairs (atom, value). */
static int read_atom_property(sd_state *st, nd_molecule *mol, int kind, nd_error *err)
{
    nd_lines *l = st->l;
    const char *what = kind == PROP_ISO ? "M  ISO" : kind == PROP_RAD ? "M  RAD" : "M  CHG";
    char *tok[20];
    int nt = split(l->buf + 6, tok, 20);
    long n;
    if (nt < 1 || nd_text_long(tok[0], &n) != 0 || n < 1 || n > 8 || nt != 1 + 2 * n)
        return nd_lines_fail(l, err, ND_EINPUT, l->lineno,
                             "%s line: expected a count 1..8 and that many atom/value pairs", what);
    for (int k = 0; k < n; k++) {
        long a, v;
        if (nd_text_long(tok[1 + 2 * k], &a) != 0 || nd_text_long(tok[2 + 2 * k], &v) != 0)
            return nd_lines_fail(l, err, ND_EINPUT, l->lineno,
                                 "%s line: entry %d is not a pair of integers", what, k + 1);
        if (a < 1 || a > mol->natoms)
            return nd_lines_fail(l, err, ND_EINPUT, l->lineno,
                                 "%s line: atom %ld is outside 1..%d", what, a, mol->natoms);
        if (kind == PROP_RAD) {
            if (v < 0 || v > 3)
                return nd_lines_fail(l, err, ND_EINPUT, l->lineno,
                                     "M  RAD line: atom %ld has radical code %ld; expected 0..3 "
                                     "(1 singlet, 2 doublet, 3 triplet)",
                                     a, v);
            st->rad[a - 1] = (int)v;
        } else if (kind == PROP_ISO) {
            if (v < mol->z[a - 1] || v > 300)
                return nd_lines_fail(l, err, ND_EINPUT, l->lineno,
                                     "M  ISO line: atom %ld has mass number %ld; expected %d..300",
                                     a, v, mol->z[a - 1]);
            mol->isotope[a - 1] = (int)v;
        } else {
            if (v < -15 || v > 15)
                return nd_lines_fail(l, err, ND_EINPUT, l->lineno,
                                     "M  CHG line: atom %ld has charge %ld; expected -15..15", a, v);
            mol->formal_charge[a - 1] = (int)v;
        }
    }
    return ND_OK;
}

/* Reads the properties block up to and including "M  END". */
static int read_properties(sd_state *st, nd_molecule *mol, nd_error *err)
{
    nd_lines *l = st->l;
    for (;;) {
        int s = rec_line(st, err, "'M  END' closing the properties block");
        if (s != ND_OK)
            return s;
        const char *ln = l->buf;
        if (strncmp(ln, "M  END", 6) == 0 && blank(ln + 6))
            return ND_OK;
        if (strncmp(ln, "M  CHG", 6) == 0 || strncmp(ln, "M  RAD", 6) == 0) {
            /* the first M  CHG or M  RAD replaces every charge and radical
             * of the atom block (CTfile spec, properties block) */
            if (!st->charge_prop) {
                st->charge_prop = 1;
                for (int i = 0; i < mol->natoms; i++)
                    mol->formal_charge[i] = st->rad[i] = 0;
            }
            s = read_atom_property(st, mol, ln[3] == 'C' ? PROP_CHG : PROP_RAD, err);
        } else if (strncmp(ln, "M  ISO", 6) == 0) {
            if (!st->iso_prop) {
                st->iso_prop = 1;
                for (int i = 0; i < mol->natoms; i++)
                    mol->isotope[i] = 0;
            }
            s = read_atom_property(st, mol, PROP_ISO, err);
        } else if (strncmp(ln, "M  ", 3) == 0 || strncmp(ln, "V  ", 3) == 0) {
            s = ND_OK; /* other properties: read over */
        } else if (strncmp(ln, "A  ", 3) == 0 || strncmp(ln, "G  ", 3) == 0) {
            s = rec_line(st, err, "the text line of an alias or group property");
        } else if (strncmp(ln, "S  SKP", 6) == 0) {
            long n;
            char buf[8];
            field(ln, l->len, 6, 3, buf);
            if (nd_text_long(buf, &n) != 0 || n < 0)
                return nd_lines_fail(l, err, ND_EINPUT, l->lineno,
                                     "S  SKP line: expected a line count in columns 7-9");
            for (long k = 0; k < n && s == ND_OK; k++)
                s = rec_line(st, err, "a line skipped by S  SKP");
        } else if (ln[0] == '>') {
            return nd_lines_fail(l, err, ND_EINPUT, l->lineno,
                                 "data item before 'M  END'; expected 'M  END' to close the "
                                 "properties block first");
        } else {
            return nd_lines_fail(l, err, ND_EINPUT, l->lineno,
                                 "expected a property line ('M  CHG', 'M  ISO', ...) or 'M  END', "
                                 "found '%.40s'",
                                 ln);
        }
        if (s != ND_OK)
            return s;
    }
}

/* ------------------------------------------------------------------ */
/* V3000                                                               */

/* Reads one logical V3000 line (joining "-" continuations) into st->v30,
 * without the "M  V30 " prefix. */
static int v30_line(sd_state *st, nd_error *err, const char *what)
{
    nd_lines *l = st->l;
    size_t n = 0;
    for (;;) {
        int s = rec_line(st, err, what);
        if (s != ND_OK)
            return s;
        if (strncmp(l->buf, "M  V30 ", 7) != 0)
            return nd_lines_fail(l, err, ND_EINPUT, l->lineno,
                                 "expected a V3000 line starting 'M  V30 ' (%s), found '%.40s'",
                                 what, l->buf);
        const char *body = l->buf + 7;
        size_t bl = l->len - 7;
        while (bl > 0 && isspace((unsigned char)body[bl - 1]))
            bl--;
        int more = bl > 0 && body[bl - 1] == '-';
        if (more)
            bl--;
        if (n + bl + 1 > ND_LINE_MAX)
            return nd_lines_fail(l, err, ND_EINPUT, l->lineno,
                                 "V3000 line continued past %d bytes", ND_LINE_MAX);
        if (n + bl + 1 > st->v30_cap) {
            size_t cap = 2 * (n + bl + 1) + 64;
            char *nb = realloc(st->v30, cap);
            if (!nb)
                return nd_fail(err, ND_ENOMEM, "out of memory reading a V3000 line");
            st->v30 = nb;
            st->v30_cap = cap;
        }
        memcpy(st->v30 + n, body, bl);
        n += bl;
        st->v30[n] = '\0';
        if (!more)
            return ND_OK;
    }
}

/* 1 if the V3000 line is exactly the words a [b] (after trimming). */
static int v30_is(const char *line, const char *words)
{
    while (isspace((unsigned char)*line))
        line++;
    size_t n = strlen(words);
    return strncmp(line, words, n) == 0 && blank(line + n);
}

/* Value of KEY= among tokens tok[from..nt), or NULL. */
static const char *v30_prop(char **tok, int from, int nt, const char *key)
{
    size_t n = strlen(key);
    for (int i = from; i < nt; i++)
        if (strncmp(tok[i], key, n) == 0 && tok[i][n] == '=')
            return tok[i] + n + 1;
    return NULL;
}

#define V30_MAXTOK 64

/* Reads a V3000 connection table, from the line after the counts line
 * through "M  V30 END CTAB". */
static int read_v3000(sd_state *st, nd_molecule *mol, nd_error *err)
{
    nd_lines *l = st->l;
    char *tok[V30_MAXTOK];
    int s = v30_line(st, err, "'BEGIN CTAB'");
    if (s != ND_OK)
        return s;
    if (!v30_is(st->v30, "BEGIN CTAB"))
        return nd_lines_fail(l, err, ND_EINPUT, l->lineno, "expected 'M  V30 BEGIN CTAB', found '%.40s'",
                             st->v30);
    s = v30_line(st, err, "the COUNTS line");
    if (s != ND_OK)
        return s;
    int nt = split(st->v30, tok, V30_MAXTOK);
    long na, nb;
    if (nt < 3 || strcmp(tok[0], "COUNTS") != 0 || nd_text_long(tok[1], &na) != 0 ||
        nd_text_long(tok[2], &nb) != 0 || na < 0 || nb < 0 || na > ND_SDF_MAX_ATOMS ||
        nb > ND_SDF_MAX_ATOMS)
        return nd_lines_fail(l, err, ND_EINPUT, l->lineno,
                             "expected 'M  V30 COUNTS atoms bonds ...' with counts 0..%d",
                             ND_SDF_MAX_ATOMS);
    if (state_reserve(st, (int)(na > nb ? na : nb)) != ND_OK)
        return nd_fail(err, ND_ENOMEM, "out of memory for %ld atoms", na);
    int atoms_done = 0, bonds_done = 0;
    for (;;) {
        s = v30_line(st, err, "a block or 'END CTAB'");
        if (s != ND_OK)
            return s;
        if (v30_is(st->v30, "END CTAB"))
            break;
        if (v30_is(st->v30, "BEGIN ATOM")) {
            if (atoms_done)
                return nd_lines_fail(l, err, ND_EINPUT, l->lineno, "a second ATOM block");
            for (int i = 0; i < na; i++) {
                s = v30_line(st, err, "an atom line");
                if (s != ND_OK)
                    return s;
                if (v30_is(st->v30, "END ATOM"))
                    return nd_lines_fail(l, err, ND_EINPUT, l->lineno,
                                         "ATOM block ends after %d atoms; COUNTS says %ld", i, na);
                nt = split(st->v30, tok, V30_MAXTOK);
                long idx;
                if (nt < 6 || nd_text_long(tok[0], &idx) != 0 || idx != i + 1)
                    return nd_lines_fail(l, err, ND_EINPUT, l->lineno,
                                         "atom %d: expected 'index type x y z map [KEY=value...]' "
                                         "with index %d",
                                         i + 1, i + 1);
                if (tok[1][0] == '[' || strcmp(tok[1], "NOT") == 0)
                    return bad_symbol(l, err, i, "L");
                int iso;
                const char *sym = tok[1];
                int z = sd_element(sym, &iso);
                if (z == 0)
                    return bad_symbol(l, err, i, sym);
                double x[3];
                static const char axis[3] = {'x', 'y', 'z'};
                for (int k = 0; k < 3; k++) {
                    s = check_coord(l, err, nd_text_double(tok[2 + k], &x[k]), i, axis[k], tok[2 + k]);
                    if (s != ND_OK)
                        return s;
                }
                if (nd_molecule_add_atom(mol, z, x[0], x[1], x[2], err) != ND_OK)
                    return ND_ENOMEM;
                const char *v;
                long q = 0, mass = iso;
                if ((v = v30_prop(tok, 6, nt < V30_MAXTOK ? nt : V30_MAXTOK, "CHG")) &&
                    (nd_text_long(v, &q) != 0 || q < -15 || q > 15))
                    return nd_lines_fail(l, err, ND_EINPUT, l->lineno,
                                         "atom %d: CHG=%.10s; expected an integer -15..15", i + 1, v);
                if ((v = v30_prop(tok, 6, nt < V30_MAXTOK ? nt : V30_MAXTOK, "MASS")) &&
                    (nd_text_long(v, &mass) != 0 || mass < z || mass > 300))
                    return nd_lines_fail(l, err, ND_EINPUT, l->lineno,
                                         "atom %d: MASS=%.10s; expected a mass number %d..300",
                                         i + 1, v, z);
                long rad = 0;
                if ((v = v30_prop(tok, 6, nt < V30_MAXTOK ? nt : V30_MAXTOK, "RAD")) &&
                    (nd_text_long(v, &rad) != 0 || rad < 0 || rad > 3))
                    return nd_lines_fail(l, err, ND_EINPUT, l->lineno,
                                         "atom %d: RAD=%.10s; expected 0..3", i + 1, v);
                mol->formal_charge[i] = (int)q;
                mol->isotope[i] = (int)mass;
                st->block_charge[i] = (int)q;
                st->block_iso[i] = (int)mass;
                st->rad[i] = st->block_rad[i] = (int)rad;
            }
            s = v30_line(st, err, "'END ATOM'");
            if (s != ND_OK)
                return s;
            if (!v30_is(st->v30, "END ATOM"))
                return nd_lines_fail(l, err, ND_EINPUT, l->lineno,
                                     "expected 'M  V30 END ATOM' after %ld atoms (the COUNTS "
                                     "line's number)",
                                     na);
            atoms_done = 1;
        } else if (v30_is(st->v30, "BEGIN BOND")) {
            if (!atoms_done)
                return nd_lines_fail(l, err, ND_EINPUT, l->lineno,
                                     "BOND block before the ATOM block");
            for (int k = 0; k < nb; k++) {
                s = v30_line(st, err, "a bond line");
                if (s != ND_OK)
                    return s;
                if (v30_is(st->v30, "END BOND"))
                    return nd_lines_fail(l, err, ND_EINPUT, l->lineno,
                                         "BOND block ends after %d bonds; COUNTS says %ld", k, nb);
                nt = split(st->v30, tok, V30_MAXTOK);
                long idx, type, a, b, cfg = 0;
                if (nt < 4 || nd_text_long(tok[0], &idx) != 0 || idx != k + 1 ||
                    nd_text_long(tok[1], &type) != 0 || nd_text_long(tok[2], &a) != 0 ||
                    nd_text_long(tok[3], &b) != 0)
                    return nd_lines_fail(l, err, ND_EINPUT, l->lineno,
                                         "bond %d: expected 'index type atom1 atom2 [KEY=value...]' "
                                         "with index %d",
                                         k + 1, k + 1);
                const char *v = v30_prop(tok, 4, nt < V30_MAXTOK ? nt : V30_MAXTOK, "CFG");
                if (v && nd_text_long(v, &cfg) != 0)
                    return nd_lines_fail(l, err, ND_EINPUT, l->lineno,
                                         "bond %d: CFG=%.10s is not an integer", k + 1, v);
                /* V3000 CFG=2 on a double bond means "either", like V2000 stereo 3 */
                s = add_bond(st, mol, k, a, b, type, type == 2 && cfg == 2 ? 3 : cfg, err);
                if (s != ND_OK)
                    return s;
            }
            s = v30_line(st, err, "'END BOND'");
            if (s != ND_OK)
                return s;
            if (!v30_is(st->v30, "END BOND"))
                return nd_lines_fail(l, err, ND_EINPUT, l->lineno,
                                     "expected 'M  V30 END BOND' after %ld bonds (the COUNTS "
                                     "line's number)",
                                     nb);
            bonds_done = 1;
        } else if (strncmp(st->v30, "BEGIN ", 6) == 0) {
            /* another block (SGROUP, COLLECTION, OBJ3D): read over to its END */
            char name[64];
            snprintf(name, sizeof name, "END %.50s", st->v30 + 6);
            long start = l->lineno;
            for (;;) {
                s = v30_line(st, err, "the end of a V3000 block");
                if (s != ND_OK)
                    return s;
                if (v30_is(st->v30, name))
                    break;
                if (v30_is(st->v30, "END CTAB"))
                    return nd_lines_fail(l, err, ND_EINPUT, start,
                                         "block is not closed before 'END CTAB'; expected '%s'", name);
            }
        } else {
            return nd_lines_fail(l, err, ND_EINPUT, l->lineno,
                                 "expected 'BEGIN ATOM', 'BEGIN BOND', another block or 'END "
                                 "CTAB', found '%.40s'",
                                 st->v30);
        }
    }
    if (!atoms_done && na > 0)
        return nd_lines_fail(l, err, ND_EINPUT, l->lineno,
                             "CTAB has no ATOM block; COUNTS says %ld atoms", na);
    if (!bonds_done && nb > 0)
        return nd_lines_fail(l, err, ND_EINPUT, l->lineno,
                             "CTAB has no BOND block; COUNTS says %ld bonds", nb);
    return ND_OK;
}

/* ------------------------------------------------------------------ */
/* Data items                                                          */

/* Reads data items up to "$$$$" or the end of input. */
static int read_data(sd_state *st, nd_molecule *mol, nd_error *err)
{
    nd_lines *l = st->l;
    char *value = NULL;
    size_t vcap = 0;
    int status = ND_OK;
    for (;;) {
        int s = nd_lines_next(l, err);
        if (s == ND_END)
            break;
        if (s != ND_OK) {
            status = s;
            goto done;
        }
        if (is_separator(l->buf)) {
            st->sep_seen = 1;
            break;
        }
        if (blank(l->buf))
            continue;
        if (l->buf[0] != '>') {
            status = nd_lines_fail(l, err, ND_EINPUT, l->lineno,
                                   "expected a data header '> <name>' or '$$$$', found '%.40s'",
                                   l->buf);
            goto done;
        }
        char *lt = strchr(l->buf, '<');
        char *gt = lt ? strchr(lt + 1, '>') : NULL;
        if (!lt || !gt || gt == lt + 1) {
            status = nd_lines_fail(l, err, ND_EINPUT, l->lineno,
                                   "data header without a name; expected '> <name>'");
            goto done;
        }
        *gt = '\0';
        char name[256];
        if (strlen(lt + 1) >= sizeof name) {
            status = nd_lines_fail(l, err, ND_EINPUT, l->lineno,
                                   "data item name longer than %zu characters", sizeof name - 1);
            goto done;
        }
        strcpy(name, lt + 1);
        long header_line = l->lineno;
        if (nd_molecule_get_data(mol, name)) {
            status = nd_lines_fail(l, err, ND_EINPUT, l->lineno,
                                   "data item <%s> appears twice in the record; expected each "
                                   "name once",
                                   name);
            goto done;
        }
        size_t vlen = 0;
        int ended = 0;
        for (;;) {
            s = nd_lines_next(l, err);
            if (s == ND_END) {
                ended = 1;
                break;
            }
            if (s != ND_OK) {
                status = s;
                goto done;
            }
            if (is_separator(l->buf)) {
                st->sep_seen = 1;
                ended = 1;
                break;
            }
            if (l->len == 0 || blank(l->buf))
                break;
            size_t need = vlen + l->len + 2;
            if (need > ND_LINE_MAX * (size_t)16) {
                status = nd_lines_fail(l, err, ND_EINPUT, header_line,
                                       "data item <%s> is longer than %d bytes", name,
                                       16 * ND_LINE_MAX);
                goto done;
            }
            if (need > vcap) {
                size_t cap = 2 * need + 64;
                char *nv = realloc(value, cap);
                if (!nv) {
                    status = nd_fail(err, ND_ENOMEM, "out of memory reading data item <%s>", name);
                    goto done;
                }
                value = nv;
                vcap = cap;
            }
            if (vlen)
                value[vlen++] = '\n';
            memcpy(value + vlen, l->buf, l->len);
            vlen += l->len;
        }
        if (nd_molecule_set_data(mol, name, vlen ? (value[vlen] = '\0', value) : "", err) != ND_OK) {
            status = ND_ENOMEM;
            goto done;
        }
        if (ended)
            break;
    }
done:
    free(value);
    return status;
}

/* ------------------------------------------------------------------ */
/* Stereo from coordinates                                             */

typedef struct {
    int atom, cls, n;
    const long *key;
} class_row;

static int cmp_class_row(const void *pa, const void *pb)
{
    const class_row *a = pa, *b = pb;
    if (a->cls != b->cls)
        return a->cls < b->cls ? -1 : 1;
    if (a->n != b->n)
        return a->n < b->n ? -1 : 1;
    for (int i = 0; i < a->n; i++)
        if (a->key[i] != b->key[i])
            return a->key[i] < b->key[i] ? -1 : 1;
    return 0;
}

static int cmp_long(const void *pa, const void *pb)
{
    long a = *(const long *)pa, b = *(const long *)pb;
    return a < b ? -1 : a > b;
}

/* Graph-invariant atom classes by iterative refinement (H. L. Morgan,
 * J. Chem. Doc. 5, 107, 1965, in the partition-refinement form): start from
 * (element, isotope, charge, degree), then split classes by the sorted list
 * of (bond order, neighbour class) until the number of classes stops
 * growing. Atoms in different classes are certainly not symmetry-
 * equivalent; atoms in one class may or may not be. cls has natoms entries. */
static int atom_classes(const nd_molecule *m, const int *start, const int *nbr, const int *ord,
                        int *cls)
{
    int n = m->natoms;
    class_row *rows = malloc((size_t)n * sizeof *rows);
    long *keys = malloc((size_t)(start[n] + 4 * n + 1) * sizeof *keys);
    int *newcls = malloc((size_t)n * sizeof *newcls);
    int status = ND_ENOMEM;
    if (!rows || !keys || !newcls)
        goto fail;
    /* initial invariant as a 4-long key */
    for (int i = 0; i < n; i++) {
        long *k = keys + 4 * i;
        k[0] = m->z[i];
        k[1] = m->isotope[i];
        k[2] = m->formal_charge[i];
        k[3] = start[i + 1] - start[i];
        rows[i] = (class_row){i, 0, 4, k};
    }
    int nclass = 0;
    for (int iter = 0; iter < 100; iter++) {
        qsort(rows, (size_t)n, sizeof *rows, cmp_class_row);
        int c = 0;
        for (int r = 0; r < n; r++) {
            if (r > 0 && cmp_class_row(&rows[r - 1], &rows[r]) != 0)
                c++;
            newcls[rows[r].atom] = c;
        }
        int count = n ? c + 1 : 0;
        memcpy(cls, newcls, (size_t)n * sizeof *cls);
        if (count == nclass)
            break;
        nclass = count;
        /* next keys: sorted (order, class) of the neighbours */
        long *k = keys;
        for (int i = 0; i < n; i++) {
            int d = start[i + 1] - start[i];
            for (int p = 0; p < d; p++)
                k[p] = (long)ord[start[i] + p] * (n + 1) + cls[nbr[start[i] + p]];
            qsort(k, (size_t)d, sizeof *k, cmp_long);
            rows[i] = (class_row){i, cls[i], d, k};
            k += d;
        }
    }
    status = ND_OK;
fail:
    free(rows);
    free(keys);
    free(newcls);
    return status;
}

/* 1 if atoms a and b are joined by a path of at most maxlen bonds that does
 * not use the bond a-b itself (so a-b lies in a ring of <= maxlen+1 atoms). */
static int small_ring(int n, const int *start, const int *nbr, int a, int b, int maxlen, int *dist,
                      int *queue)
{
    for (int i = 0; i < n; i++)
        dist[i] = -1;
    int head = 0, tail = 0;
    dist[a] = 0;
    queue[tail++] = a;
    while (head < tail) {
        int u = queue[head++];
        if (dist[u] >= maxlen)
            continue;
        for (int p = start[u]; p < start[u + 1]; p++) {
            int v = nbr[p];
            if (u == a && v == b)
                continue;
            if (dist[v] >= 0)
                continue;
            dist[v] = dist[u] + 1;
            if (v == b)
                return 1;
            queue[tail++] = v;
        }
    }
    return 0;
}

/* Sets chirality (3D only) and double-bond configuration from the
 * coordinates, as described in sdf.h. stereo[k] is bond k's stereo field. */
static int derive_stereo(nd_molecule *m, const int *stereo)
{
    int n = m->natoms;
    if (n == 0 || m->nbonds == 0 || m->dimension == 0)
        return ND_OK;
    int *start = calloc((size_t)n + 1, sizeof *start);
    int *nbr = malloc((size_t)2 * (size_t)m->nbonds * sizeof *nbr);
    int *ord = malloc((size_t)2 * (size_t)m->nbonds * sizeof *ord);
    int *fill = calloc((size_t)n, sizeof *fill);
    int *cls = malloc((size_t)n * sizeof *cls);
    int *dist = malloc((size_t)n * sizeof *dist);
    int *queue = malloc((size_t)n * sizeof *queue);
    int status = ND_ENOMEM;
    if (!start || !nbr || !ord || !fill || !cls || !dist || !queue)
        goto fail;
    for (int k = 0; k < m->nbonds; k++) {
        start[m->bonds[k].a + 1]++;
        start[m->bonds[k].b + 1]++;
    }
    for (int i = 0; i < n; i++)
        start[i + 1] += start[i];
    for (int k = 0; k < m->nbonds; k++) {
        int a = m->bonds[k].a, b = m->bonds[k].b, o = m->bonds[k].order;
        nbr[start[a] + fill[a]] = b;
        ord[start[a] + fill[a]++] = o;
        nbr[start[b] + fill[b]] = a;
        ord[start[b] + fill[b]++] = o;
    }
    for (int i = 0; i < n; i++) /* neighbours ascending, orders alongside */
        for (int p = start[i] + 1; p < start[i + 1]; p++)
            for (int q = p; q > start[i] && nbr[q - 1] > nbr[q]; q--) {
                int t = nbr[q];
                nbr[q] = nbr[q - 1];
                nbr[q - 1] = t;
                t = ord[q];
                ord[q] = ord[q - 1];
                ord[q - 1] = t;
            }
    if (atom_classes(m, start, nbr, ord, cls) != ND_OK)
        goto fail;
    const double *x = m->xyz;
    if (m->dimension == 3)
        for (int i = 0; i < n; i++) {
            int d = start[i + 1] - start[i];
            int zi = m->z[i];
            if (!(d == 4 || (d == 3 && (zi == 15 || zi == 16 || zi == 34))))
                continue;
            int distinct = 1;
            for (int p = start[i]; p < start[i + 1] && distinct; p++)
                for (int q = p + 1; q < start[i + 1]; q++)
                    if (cls[nbr[p]] == cls[nbr[q]])
                        distinct = 0;
            if (!distinct)
                continue;
            double v[3][3], len[3];
            for (int k = 0; k < 3; k++) {
                int j = nbr[start[i] + k];
                for (int c = 0; c < 3; c++)
                    v[k][c] = x[3 * j + c] - x[3 * i + c];
                len[k] = sqrt(v[k][0] * v[k][0] + v[k][1] * v[k][1] + v[k][2] * v[k][2]);
            }
            double vol = v[0][0] * (v[1][1] * v[2][2] - v[1][2] * v[2][1]) -
                         v[0][1] * (v[1][0] * v[2][2] - v[1][2] * v[2][0]) +
                         v[0][2] * (v[1][0] * v[2][1] - v[1][1] * v[2][0]);
            /* a nearly flat centre (normalised volume below 0.1; an ideal
             * tetrahedron gives about 0.51) has no trustworthy sign:
             * common practice, no source */
            double scale = len[0] * len[1] * len[2];
            if (scale > 0.0 && fabs(vol) > 0.1 * scale)
                m->chirality[i] = vol > 0.0 ? 1 : -1;
        }
    for (int k = 0; k < m->nbonds; k++) {
        nd_bond *bd = &m->bonds[k];
        if (bd->order != 2 || stereo[k] == 3)
            continue;
        int end[2] = {bd->a, bd->b}, sub[2] = {-1, -1}, ok = 1;
        for (int e = 0; e < 2 && ok; e++) {
            int u = end[e], other = end[1 - e];
            int d = start[u + 1] - start[u];
            if (d < 2 || d > 3) {
                ok = 0;
                break;
            }
            int cand[2], nc = 0;
            for (int p = start[u]; p < start[u + 1]; p++) {
                if (nbr[p] == other)
                    continue;
                if (ord[p] == 2) /* cumulated double bonds */
                    ok = 0;
                cand[nc++] = nbr[p];
            }
            if (nc == 2 && cls[cand[0]] == cls[cand[1]])
                ok = 0;
            sub[e] = cand[0]; /* neighbours are ascending: the lowest index */
        }
        if (!ok || small_ring(n, start, nbr, bd->a, bd->b, 6, dist, queue))
            continue;
        double w[3], u[3], v[3], ww = 0.0;
        for (int c = 0; c < 3; c++) {
            w[c] = x[3 * bd->b + c] - x[3 * bd->a + c];
            u[c] = x[3 * sub[0] + c] - x[3 * bd->a + c];
            v[c] = x[3 * sub[1] + c] - x[3 * bd->b + c];
            ww += w[c] * w[c];
        }
        if (ww <= 0.0)
            continue;
        double uw = u[0] * w[0] + u[1] * w[1] + u[2] * w[2];
        double vw = v[0] * w[0] + v[1] * w[1] + v[2] * w[2];
        double uu = 0.0, vv = 0.0, uv = 0.0;
        for (int c = 0; c < 3; c++) { /* components perpendicular to the bond */
            u[c] -= uw / ww * w[c];
            v[c] -= vw / ww * w[c];
            uu += u[c] * u[c];
            vv += v[c] * v[c];
            uv += u[c] * v[c];
        }
        if (uu <= 1e-12 || vv <= 1e-12)
            continue;
        double cosphi = uv / sqrt(uu * vv);
        /* dihedral within 60 degrees of 0 or 180: common practice, no source */
        if (cosphi > 0.5)
            bd->config = ND_DB_CIS;
        else if (cosphi < -0.5)
            bd->config = ND_DB_TRANS;
    }
    status = ND_OK;
fail:
    free(start);
    free(nbr);
    free(ord);
    free(fill);
    free(cls);
    free(dist);
    free(queue);
    return status;
}

/* ------------------------------------------------------------------ */
/* Record                                                              */

/* Reads the record body (header through data items). */
static int read_record(sd_state *st, nd_molecule *mol, nd_error *err)
{
    nd_lines *l = st->l;
    int s;
    /* header block: up to three leading blank lines are blank header lines */
    int nblank = 0;
    l->record++; /* provisionally, so messages name the record being begun */
    for (;;) {
        s = nd_lines_next(l, err);
        if (s == ND_END) {
            l->record--;
            return ND_END;
        }
        if (s != ND_OK)
            return s;
        if (!blank(l->buf))
            break;
        nblank++;
    }
    if (nblank > 3)
        return nd_lines_fail(l, err, ND_EINPUT, l->lineno - nblank,
                             "%d blank lines at the start of the record; expected a 3-line header "
                             "block and a counts line",
                             nblank);
    int dim_code = 0;
    for (int h = nblank; h < 3; h++) {
        if (h > nblank) {
            s = rec_line(st, err, h == 1 ? "header line 2 (program)" : "header line 3 (comment)");
            if (s != ND_OK)
                return s;
        } else if (is_separator(l->buf)) {
            st->sep_seen = 1;
            return nd_lines_fail(l, err, ND_EINPUT, l->lineno,
                                 "empty record ('$$$$' where a header block was expected)");
        }
        if (h == 0) {
            size_t k = l->len;
            while (k > 0 && isspace((unsigned char)l->buf[k - 1]))
                l->buf[--k] = '\0';
            for (size_t c = 0; c < k; c++)
                if (l->buf[c] == '\r')
                    l->buf[c] = ' '; /* a stray carriage return inside the line */
            if (k && nd_molecule_set_title(mol, l->buf, err) != ND_OK)
                return ND_ENOMEM;
        } else if (h == 1 && l->len >= 22) {
            if (strncmp(l->buf + 20, "3D", 2) == 0)
                dim_code = 3;
            else if (strncmp(l->buf + 20, "2D", 2) == 0)
                dim_code = 2;
        }
    }
    /* counts line: already in hand when all three header lines were blank */
    if (nblank < 3) {
        s = rec_line(st, err, "the counts line");
        if (s != ND_OK)
            return s;
    } else if (is_separator(l->buf)) {
        st->sep_seen = 1;
        return nd_lines_fail(l, err, ND_EINPUT, l->lineno,
                             "record ends ('$$$$') too early; expected the counts line");
    }
    const char *ln = l->buf;
    size_t len = l->len;
    char version[8];
    field(ln, len, 33, 6, version);
    long na, nb, nlists;
    int v3000 = strcmp(version, "V3000") == 0;
    if (!v3000 && version[0] && strcmp(version, "V2000") != 0)
        return nd_lines_fail(l, err, ND_EINPUT, l->lineno,
                             "counts line has version '%s' in columns 34-39; expected V2000 or V3000",
                             version);
    if (len < 6 || field_int(ln, len, 0, 3, &na) != 0 || field_int(ln, len, 3, 3, &nb) != 0 ||
        field_int(ln, len, 6, 3, &nlists) != 0 || na < 0 || nb < 0)
        return nd_lines_fail(l, err, ND_EINPUT, l->lineno,
                             "expected the counts line (atoms in columns 1-3, bonds in 4-6, "
                             "'V2000' in 34-39), found '%.40s'",
                             ln);
    if (v3000) {
        s = read_v3000(st, mol, err);
        if (s != ND_OK)
            return s;
    } else {
        if (nlists > 0)
            return nd_lines_fail(l, err, ND_EINPUT, l->lineno,
                                 "counts line announces %ld atom lists (a query); expected a "
                                 "molecule",
                                 nlists);
        s = read_atoms_v2000(st, mol, (int)na, err);
        if (s != ND_OK)
            return s;
        s = read_bonds_v2000(st, mol, (int)nb, err);
        if (s != ND_OK)
            return s;
    }
    s = check_duplicate_bonds(st, mol, err);
    if (s != ND_OK)
        return s;
    s = read_properties(st, mol, err);
    if (s != ND_OK)
        return s;
    int unpaired = 0;
    for (int i = 0; i < mol->natoms; i++) {
        if (!v3000 && !st->charge_prop) {
            mol->formal_charge[i] = st->block_charge[i];
            st->rad[i] = st->block_rad[i];
        }
        if (!v3000 && !st->iso_prop)
            mol->isotope[i] = st->block_iso[i];
        unpaired += st->rad[i] == 2 ? 1 : st->rad[i] == 3 ? 2 : 0;
    }
    mol->multiplicity = unpaired + 1; /* high spin: every radical centre's electrons parallel */
    s = read_data(st, mol, err);
    if (s != ND_OK)
        return s;
    /* dimension: the header's code, or the coordinates */
    int anyz = 0, anyxy = 0;
    for (int i = 0; i < mol->natoms; i++) {
        if (mol->xyz[3 * i + 2] != 0.0)
            anyz = 1;
        if (mol->xyz[3 * i] != 0.0 || mol->xyz[3 * i + 1] != 0.0)
            anyxy = 1;
    }
    mol->dimension = anyz ? 3 : dim_code ? dim_code : anyxy ? 2 : 0;
    mol->charge = nd_molecule_formal_charge_sum(mol);
    if (derive_stereo(mol, st->bond_stereo) != ND_OK)
        return nd_fail(err, ND_ENOMEM, "out of memory deriving stereo");
    return ND_OK;
}

int nd_sdf_read(nd_lines *l, nd_molecule *mol, nd_error *err)
{
    sd_state st;
    memset(&st, 0, sizeof st);
    st.l = l;
    nd_molecule_clear(mol);
    mol->has_bonds = 1; /* a connection table states its bonds, even none */
    int s = read_record(&st, mol, err);
    if (s == ND_END) {
        mol->has_bonds = 0;
    } else if (s == ND_EINPUT && !st.sep_seen) {
        /* skip to the end of the bad record */
        nd_error tmp;
        for (;;) {
            int r = nd_lines_next(l, &tmp);
            if (r == ND_END)
                break;
            if (r == ND_EINPUT)
                continue;
            if (r != ND_OK) {
                s = r;
                if (err)
                    *err = tmp;
                break;
            }
            if (is_separator(l->buf))
                break;
        }
    }
    state_free(&st);
    return s;
}

/* ------------------------------------------------------------------ */
/* Writer                                                              */

int nd_sdf_write(FILE *f, const nd_molecule *m, nd_error *err)
{
    const char *t = m->title ? m->title : "";
    if (m->natoms > 999 || m->nbonds > 999)
        return nd_fail(err, ND_EINPUT,
                       "molecule '%.60s' has %d atoms and %d bonds; an SD V2000 record holds at "
                       "most 999 of each",
                       t, m->natoms, m->nbonds);
    if (is_separator(t))
        return nd_fail(err, ND_EINPUT, "molecule title '$$$$' cannot be an SD header line");
    int ncharged = 0, niso = 0;
    for (int i = 0; i < m->natoms; i++) {
        if (m->z[i] < 1 || m->z[i] > ND_MAX_Z)
            return nd_fail(err, ND_EINPUT, "molecule '%.60s': atom %d has atomic number %d", t,
                           i + 1, m->z[i]);
        for (int k = 0; k < 3; k++) {
            double v = m->xyz[3 * i + k];
            if (!isfinite(v) || v <= -9999.99995 || v >= 99999.99995)
                return nd_fail(err, ND_EINPUT,
                               "molecule '%.60s': atom %d has coordinate %g, which does not fit "
                               "the SD 10.4 columns (-9999.9999..99999.9999)",
                               t, i + 1, v);
        }
        if (m->formal_charge[i] < -15 || m->formal_charge[i] > 15)
            return nd_fail(err, ND_EINPUT, "molecule '%.60s': atom %d has charge %d; SD holds -15..15",
                           t, i + 1, m->formal_charge[i]);
        if (m->isotope[i] < 0 || m->isotope[i] > 999)
            return nd_fail(err, ND_EINPUT, "molecule '%.60s': atom %d has mass number %d", t, i + 1,
                           m->isotope[i]);
        ncharged += m->formal_charge[i] != 0;
        niso += m->isotope[i] != 0;
    }
    for (int k = 0; k < m->nbonds; k++)
        if (m->bonds[k].order < 1 || m->bonds[k].order > 4)
            return nd_fail(err, ND_EINPUT, "molecule '%.60s': bond %d has order %d", t, k + 1,
                           m->bonds[k].order);
    for (int d = 0; d < m->ndata; d++) {
        const char *name = m->data[d].name, *v = m->data[d].value;
        if (!name[0] || strpbrk(name, "<>\n\r"))
            return nd_fail(err, ND_EINPUT,
                           "molecule '%.60s': data item name '%.40s' cannot be written to SD "
                           "(empty, or holds '<', '>' or a line break)",
                           t, name);
        /* a value line that is empty ends the value early; one that is $$$$ ends the record */
        const char *p = v;
        for (;;) {
            const char *e = strchr(p, '\n');
            size_t n = e ? (size_t)(e - p) : strlen(p);
            int empty = 1;
            for (size_t i = 0; i < n; i++)
                if (!isspace((unsigned char)p[i]))
                    empty = 0;
            if ((empty && (e || p != v)) || (n >= 4 && strncmp(p, "$$$$", 4) == 0))
                return nd_fail(err, ND_EINPUT,
                               "molecule '%.60s': data item <%s> has an empty or '$$$$' line, "
                               "which SD cannot hold",
                               t, name);
            if (!e)
                break;
            p = e + 1;
        }
    }
    for (const char *c = t; *c; c++) /* line breaks in a title become spaces, as in XYZ */
        putc(*c == '\n' || *c == '\r' ? ' ' : *c, f);
    fprintf(f, "\n  nadir             %s\n\n", m->dimension == 3 ? "3D" : m->dimension == 2 ? "2D" : "  ");
    fprintf(f, "%3d%3d  0  0  0  0  0  0  0  0999 V2000\n", m->natoms, m->nbonds);
    for (int i = 0; i < m->natoms; i++) {
        int q = m->formal_charge[i];
        int code = (q >= -3 && q <= 3 && q != 0) ? 4 - q : 0;
        fprintf(f, "%10.4f%10.4f%10.4f %-3s 0%3d  0  0  0  0  0  0  0  0  0  0\n", m->xyz[3 * i],
                m->xyz[3 * i + 1], m->xyz[3 * i + 2], nd_element_symbol(m->z[i]), code);
    }
    for (int k = 0; k < m->nbonds; k++)
        fprintf(f, "%3d%3d%3d  0\n", m->bonds[k].a + 1, m->bonds[k].b + 1, m->bonds[k].order);
    for (int pass = 0; pass < 2; pass++) {
        int total = pass ? niso : ncharged, done = 0;
        for (int i = 0; i < m->natoms && done < total;) {
            int group = total - done < 8 ? total - done : 8;
            fprintf(f, "M  %s%3d", pass ? "ISO" : "CHG", group);
            for (int g = 0; g < group; i++) {
                int v = pass ? m->isotope[i] : m->formal_charge[i];
                if (v != 0) {
                    fprintf(f, " %3d %3d", i + 1, v);
                    g++;
                }
            }
            fputc('\n', f);
            done += group;
        }
    }
    fputs("M  END\n", f);
    for (int d = 0; d < m->ndata; d++)
        fprintf(f, "> <%s>\n%s\n\n", m->data[d].name, m->data[d].value);
    fputs("$$$$\n", f);
    if (ferror(f))
        return nd_fail(err, ND_EIO, "write error: %s", strerror(errno));
    return ND_OK;
}
