/* SMILES reader and writer, following the OpenSMILES specification
 * (opensmiles.org): grammar, organic subset and normal valences, aromaticity
 * by lowercase symbols, ring closures, bond directions for cis/trans and
 * tetrahedral chirality @/@@ relative to the written neighbour order.
 *
 * Reading is three passes: the grammar pass builds atoms and bonds with
 * their written neighbour order; the valence pass works out implicit
 * hydrogens and which aromatic atoms need a double bond; kekulisation picks
 * the double bonds by a maximum matching (Edmonds' blossom algorithm) over
 * the aromatic bonds. Stereo is then converted to the molecule's own
 * conventions (molecule.h), which refer to atom indices, not text order. */
#include "core/smiles.h"

#include "core/elements.h"

#include <limits.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#define LONE_PAIR INT_MAX  /* stands for the lone pair of a 3-coordinate centre */
#define MAX_WRITTEN 8      /* written neighbours kept per atom (chirality needs 4) */
#define H_SLOT (-1)        /* placeholder for a bracket hydrogen in a written list */
#define RING_SLOT (-2)     /* placeholder for a ring bond not closed yet */

typedef struct {
    int z, arom, iso, charge;
    int hcount;        /* bracket H count; -1 for organic-subset atoms (implicit) */
    int chiral;        /* 0, 1 for @, 2 for @@ */
    int col;           /* 1-based column of the atom symbol */
    int has_prev;      /* bonded to a preceding atom in the text */
    int nw;            /* written neighbours seen (may exceed MAX_WRITTEN) */
    int w[MAX_WRITTEN];
    int pi;            /* needs one double bond from kekulisation */
    int nh;            /* hydrogens to add (implicit or bracket) */
    int h0;            /* index of its first added hydrogen */
} patom;

typedef struct {
    int a, b, order;   /* order 1-3, or 4 for aromatic */
    int implicit_arom; /* aromatic because both ends were lowercase, no symbol */
    int dir;           /* side of b as seen from a: +1 '/', -1 '\', 0 none (a written first) */
    int col;
} pbond;

typedef struct {
    int open, atom, order, dir, col, slot;
} pring;

typedef struct {
    const char *s;
    patom *atoms;
    int natoms, cap_atoms;
    pbond *bonds;
    int nbonds, cap_bonds;
    pring ring[100];
    nd_error *err;
} parser;

/* ---------------------------------------------------------------- valences */

/* Normal valences of an element as OpenSMILES lists them for the organic
 * subset (B 3; C 4; N 3,5; O 2; P 3,5; S 2,4,6; halogens 1), extended to
 * the same groups in rows 3-5. Returns the count written to v (0 when the
 * element has no valence rule here, such as metals). */
static int normal_valences(int z, int v[4])
{
    switch (z) {
    case 1: v[0] = 1; return 1;
    case 5: case 13: v[0] = 3; return 1;
    case 6: case 14: case 32: v[0] = 4; return 1;
    case 7: case 15: case 33: case 51: v[0] = 3; v[1] = 5; return 2;
    case 8: v[0] = 2; return 1;
    case 16: case 34: case 52: v[0] = 2; v[1] = 4; v[2] = 6; return 3;
    case 9: case 17: case 35: case 53: v[0] = 1; return 1;
    default: return 0;
    }
}

/* Valences a bracket atom of element z and charge q may have: those of the
 * isoelectronic neutral element of the same row (N+ like C, O- like F,
 * B- like C), which is the usual reading of charged main-group atoms. The
 * largest entry is the limit checked against; heavier halogens may be
 * hypervalent (1, 3, 5, 7). 0 when no rule applies. */
static int charged_valences(int z, int q, int v[4])
{
    int zz = z - q;
    int row_z = z <= 2 ? 1 : z <= 10 ? 2 : z <= 18 ? 3 : z <= 36 ? 4 : 5;
    int row_zz = zz <= 2 ? 1 : zz <= 10 ? 2 : zz <= 18 ? 3 : zz <= 36 ? 4 : 5;
    if (zz < 1 || row_z != row_zz)
        return 0;
    if (z == 1)
        return q == 0 ? (v[0] = 1, 1) : (v[0] = 0, 1);
    if (zz == 17 || zz == 35 || zz == 53) {
        v[0] = 1; v[1] = 3; v[2] = 5; v[3] = 7;
        return 4;
    }
    return normal_valences(zz, v);
}

/* ---------------------------------------------------------------- building */

static int perr(parser *p, int col, const char *fmt, const char *what)
{
    char buf[400];
    snprintf(buf, sizeof buf, fmt, what);
    return nd_fail(p->err, ND_EINPUT, "SMILES column %d: %s", col, buf);
}

/* Appends an atom; returns its index or -1 when out of memory. */
static int new_atom(parser *p)
{
    if (p->natoms == p->cap_atoms) {
        int cap = p->cap_atoms ? 2 * p->cap_atoms : 32;
        patom *a = realloc(p->atoms, (size_t)cap * sizeof *a);
        if (!a)
            return -1;
        p->atoms = a;
        p->cap_atoms = cap;
    }
    patom *a = &p->atoms[p->natoms];
    memset(a, 0, sizeof *a);
    a->hcount = -1;
    return p->natoms++;
}

/* Appends who (an atom, H_SLOT or RING_SLOT) to a's written neighbours. */
static void add_written(patom *a, int who)
{
    if (a->nw < MAX_WRITTEN)
        a->w[a->nw] = who;
    a->nw++;
}

/* Finds the bond between atoms a and b, or -1. */
static int find_bond(const parser *p, int a, int b)
{
    for (int i = 0; i < p->nbonds; i++)
        if ((p->bonds[i].a == a && p->bonds[i].b == b) || (p->bonds[i].a == b && p->bonds[i].b == a))
            return i;
    return -1;
}

/* Appends a bond a-b (a written first); fails on a second bond between the
 * same pair. Returns the bond index or -1 with err set. */
static int new_bond(parser *p, int a, int b, int order, int dir, int col, int ring)
{
    /* only a ring closure can repeat a pair: a chain bond always reaches a
     * new atom, so the scan is skipped for those */
    if (ring && find_bond(p, a, b) >= 0) {
        char what[96];
        snprintf(what, sizeof what, "two bonds between the same pair of atoms (columns %d and %d)",
                 p->atoms[a].col, p->atoms[b].col);
        perr(p, col, "%s", what);
        return -1;
    }
    if (p->nbonds == p->cap_bonds) {
        int cap = p->cap_bonds ? 2 * p->cap_bonds : 32;
        pbond *nb = realloc(p->bonds, (size_t)cap * sizeof *nb);
        if (!nb) {
            nd_fail(p->err, ND_ENOMEM, "out of memory reading SMILES");
            return -1;
        }
        p->bonds = nb;
        p->cap_bonds = cap;
    }
    int implicit_arom = 0;
    if (order == 0) { /* no symbol written */
        if (p->atoms[a].arom && p->atoms[b].arom) {
            order = ND_BOND_AROMATIC;
            implicit_arom = 1;
        } else {
            order = ND_BOND_SINGLE;
        }
    }
    p->bonds[p->nbonds] = (pbond){a, b, order, implicit_arom, dir, col};
    return p->nbonds++;
}

/* ---------------------------------------------------------------- grammar */

typedef struct {
    int order; /* 0 none written, 1-3, 4 aromatic ':' */
    int dir;   /* +1 '/', -1 '\' */
    int col;   /* column of the symbol, 0 when none */
    int quad;
} pending;

/* Reads a bond symbol at s[i] into *b; returns 1 if it was one. */
static int read_bond_symbol(char c, int col, pending *b)
{
    switch (c) {
    case '-': *b = (pending){ND_BOND_SINGLE, 0, col, 0}; return 1;
    case '=': *b = (pending){ND_BOND_DOUBLE, 0, col, 0}; return 1;
    case '#': *b = (pending){ND_BOND_TRIPLE, 0, col, 0}; return 1;
    case '$': *b = (pending){ND_BOND_TRIPLE, 0, col, 1}; return 1;
    case ':': *b = (pending){ND_BOND_AROMATIC, 0, col, 0}; return 1;
    case '/': *b = (pending){ND_BOND_SINGLE, 1, col, 0}; return 1;
    case '\\': *b = (pending){ND_BOND_SINGLE, -1, col, 0}; return 1;
    default: return 0;
    }
}

/* Parses the bracket atom starting at s[*pos] == '['; advances *pos past
 * the ']'. Fills atom k. ND_OK or an error naming the column. */
static int parse_bracket(parser *p, int *pos, int k)
{
    const char *s = p->s;
    int i = *pos + 1;
    patom *a = &p->atoms[k];
    a->col = *pos + 1;
    a->hcount = 0;
    if (s[i] >= '0' && s[i] <= '9') {
        int iso = 0;
        while (s[i] >= '0' && s[i] <= '9') {
            iso = iso * 10 + (s[i] - '0');
            if (iso > 999)
                return perr(p, i + 1, "%s", "isotope mass number too large");
            i++;
        }
        if (iso == 0)
            return perr(p, a->col + 1, "%s", "isotope mass number 0");
        a->iso = iso;
    }
    /* element symbol: aromatic se/as and b c n o p s, else one or two letters */
    int symcol = i + 1;
    if ((s[i] == 's' && s[i + 1] == 'e') || (s[i] == 'a' && s[i + 1] == 's')) {
        a->z = s[i] == 's' ? 34 : 33;
        a->arom = 1;
        i += 2;
    } else if (s[i] && strchr("bcnops", s[i])) {
        char up = (char)(s[i] - 'a' + 'A');
        a->z = nd_element_from_symbol(&up, 1);
        a->arom = 1;
        i++;
    } else if (s[i] >= 'A' && s[i] <= 'Z') {
        int z2 = 0;
        if (s[i + 1] >= 'a' && s[i + 1] <= 'z') {
            z2 = nd_element_from_symbol(s + i, 2);
            if (!z2) { /* nothing but an element letter may follow inside [ ] */
                char sym[3] = {s[i], s[i + 1], '\0'};
                return perr(p, symcol, "unknown or unsupported element '%s' (elements H to Xe)",
                            sym);
            }
        }
        if (z2) {
            a->z = z2;
            i += 2;
        } else {
            a->z = nd_element_from_symbol(s + i, 1);
            if (!a->z) {
                char sym[3] = {s[i], (s[i + 1] >= 'a' && s[i + 1] <= 'z') ? s[i + 1] : '\0', '\0'};
                return perr(p, symcol, "unknown or unsupported element '%s' (elements H to Xe)", sym);
            }
            i++;
        }
    } else if (s[i] == '*') {
        return perr(p, symcol, "%s", "wildcard atom '*' has no element and cannot be built");
    } else if (s[i] == ']' || s[i] == '\0') {
        return perr(p, symcol, "%s", "bracket atom without an element symbol");
    } else {
        char c[2] = {s[i], '\0'};
        return perr(p, symcol, "unknown element starting with '%s'", c);
    }
    /* chirality */
    if (s[i] == '@') {
        int ccol = i + 1;
        i++;
        if (s[i] == '@') {
            a->chiral = 2;
            i++;
        } else if (s[i] == 'T' && s[i + 1] == 'H' && (s[i + 2] == '1' || s[i + 2] == '2')) {
            a->chiral = s[i + 2] == '1' ? 1 : 2;
            i += 3;
        } else if ((s[i] == 'A' && s[i + 1] == 'L') || (s[i] == 'S' && s[i + 1] == 'P') ||
                   (s[i] == 'T' && s[i + 1] == 'B') || (s[i] == 'O' && s[i + 1] == 'H')) {
            char cls[3] = {s[i], s[i + 1], '\0'};
            return perr(p, ccol,
                        "chirality class @%s is not supported (only tetrahedral @ and @@)", cls);
        } else {
            a->chiral = 1;
        }
    }
    /* hydrogen count */
    if (s[i] == 'H') {
        i++;
        a->hcount = 1;
        if (s[i] >= '0' && s[i] <= '9') {
            a->hcount = s[i] - '0';
            i++;
            if (s[i] >= '0' && s[i] <= '9')
                return perr(p, i + 1, "%s", "hydrogen count has more than one digit");
        }
    }
    /* charge */
    if (s[i] == '+' || s[i] == '-') {
        int sign = s[i] == '+' ? 1 : -1;
        char c = s[i];
        i++;
        if (s[i] >= '0' && s[i] <= '9') {
            int q = 0;
            while (s[i] >= '0' && s[i] <= '9') {
                q = q * 10 + (s[i] - '0');
                if (q > 15)
                    return perr(p, i + 1, "%s", "charge larger than 15");
                i++;
            }
            a->charge = sign * q;
        } else {
            int q = 1;
            while (s[i] == c) {
                q++;
                i++;
            }
            a->charge = sign * q;
        }
    }
    /* atom class */
    if (s[i] == ':') {
        i++;
        if (!(s[i] >= '0' && s[i] <= '9'))
            return perr(p, i + 1, "%s", "atom class ':' without a number");
        while (s[i] >= '0' && s[i] <= '9')
            i++;
    }
    if (s[i] != ']') {
        if (s[i] == '\0')
            return perr(p, a->col, "%s", "'[' never closed by ']'");
        char c[2] = {s[i], '\0'};
        return perr(p, i + 1, "unexpected '%s' inside a bracket atom", c);
    }
    if (a->z == 1 && a->hcount > 0)
        return perr(p, a->col, "%s", "hydrogen atom with its own hydrogen count");
    *pos = i + 1;
    return ND_OK;
}

/* Parses an organic-subset atom at s[*pos]; 1 on success, 0 if none here. */
static int parse_organic(parser *p, int *pos, int k)
{
    const char *s = p->s;
    int i = *pos;
    patom *a = &p->atoms[k];
    a->col = i + 1;
    a->hcount = -1;
    if (s[i] == 'C' && s[i + 1] == 'l') {
        a->z = 17; i += 2;
    } else if (s[i] == 'B' && s[i + 1] == 'r') {
        a->z = 35; i += 2;
    } else {
        switch (s[i]) {
        case 'B': a->z = 5; break;
        case 'C': a->z = 6; break;
        case 'N': a->z = 7; break;
        case 'O': a->z = 8; break;
        case 'P': a->z = 15; break;
        case 'S': a->z = 16; break;
        case 'F': a->z = 9; break;
        case 'I': a->z = 53; break;
        case 'b': a->z = 5; a->arom = 1; break;
        case 'c': a->z = 6; a->arom = 1; break;
        case 'n': a->z = 7; a->arom = 1; break;
        case 'o': a->z = 8; a->arom = 1; break;
        case 'p': a->z = 15; a->arom = 1; break;
        case 's': a->z = 16; a->arom = 1; break;
        default: return 0;
        }
        i++;
    }
    *pos = i;
    return 1;
}

/* Handles a ring-closure number n (columns col) at atom cur with the bond
 * symbol b written before it. */
static int ring_closure(parser *p, int n, int col, int cur, const pending *b)
{
    pring *r = &p->ring[n];
    if (b->quad)
        return perr(p, b->col, "%s", "quadruple bond '$' is not supported");
    if (!r->open) {
        *r = (pring){1, cur, b->order, b->dir, col, p->atoms[cur].nw};
        add_written(&p->atoms[cur], RING_SLOT);
        return ND_OK;
    }
    int a = r->atom;
    if (a == cur) {
        char what[80];
        snprintf(what, sizeof what, "ring bond %d closes on the atom that opened it", n);
        return perr(p, col, "%s", what);
    }
    int order = r->order;
    if (b->order && order && b->order != order) {
        char what[120];
        snprintf(what, sizeof what, "ring bond %d has different bond symbols at its two ends "
                 "(columns %d and %d)", n, r->col, col);
        return perr(p, col, "%s", what);
    }
    if (!order)
        order = b->order;
    /* the bond runs a -> cur; a direction written at cur means cur -> a */
    int dir = r->dir;
    if (b->dir) {
        if (dir && dir != -b->dir) {
            char what[100];
            snprintf(what, sizeof what, "ring bond %d has contradicting / and \\ at its two ends", n);
            return perr(p, col, "%s", what);
        }
        dir = -b->dir;
    }
    if (new_bond(p, a, cur, order, dir, col, 1) < 0)
        return p->err ? (int)p->err->code : (int)ND_EINPUT;
    if (r->slot < MAX_WRITTEN)
        p->atoms[a].w[r->slot] = cur;
    add_written(&p->atoms[cur], a);
    r->open = 0;
    return ND_OK;
}

/* The grammar pass: atoms, bonds, branches, ring closures. Stops at the
 * end of the string or at the first whitespace. */
static int parse_grammar(parser *p)
{
    const char *s = p->s;
    int prev = -1, i = 0;
    pending bond = {0, 0, 0, 0};
    int *stack = NULL, *stack_col = NULL, *stack_natoms = NULL, depth = 0, cap = 0;
    int part_atoms = 0, dot_col = 0;
    int rc = ND_OK;
    while (s[i] && s[i] != ' ' && s[i] != '\t' && s[i] != '\n' && s[i] != '\r') {
        char c = s[i];
        int col = i + 1;
        pending nb;
        if (read_bond_symbol(c, col, &nb)) {
            if (bond.col) {
                rc = perr(p, col, "%s", "two bond symbols in a row");
                goto done;
            }
            if (prev < 0) {
                rc = perr(p, col, "%s", "bond symbol with no atom before it");
                goto done;
            }
            bond = nb;
            i++;
            continue;
        }
        if (c == '(') {
            if (prev < 0) {
                rc = perr(p, col, "%s", "branch '(' with no atom before it");
                goto done;
            }
            if (bond.col) {
                rc = perr(p, bond.col, "%s", "bond symbol before '(' (write it inside the branch)");
                goto done;
            }
            if (depth == cap) {
                cap = cap ? 2 * cap : 16;
                int *ns = realloc(stack, (size_t)cap * sizeof *ns);
                int *nc = ns ? realloc(stack_col, (size_t)cap * sizeof *nc) : NULL;
                if (ns)
                    stack = ns;
                if (nc)
                    stack_col = nc;
                int *nn = nc ? realloc(stack_natoms, (size_t)cap * sizeof *nn) : NULL;
                if (nn)
                    stack_natoms = nn;
                if (!ns || !nc || !nn) {
                    rc = nd_fail(p->err, ND_ENOMEM, "out of memory reading SMILES");
                    goto done;
                }
            }
            stack[depth] = prev;
            stack_col[depth] = col;
            stack_natoms[depth] = p->natoms;
            depth++;
            i++;
            continue;
        }
        if (c == ')') {
            if (depth == 0) {
                rc = perr(p, col, "%s", "')' without a matching '('");
                goto done;
            }
            if (bond.col) {
                rc = perr(p, bond.col, "%s", "bond symbol with no atom after it before ')'");
                goto done;
            }
            depth--;
            if (stack_natoms[depth] == p->natoms) {
                rc = perr(p, stack_col[depth], "%s", "empty branch '()'");
                goto done;
            }
            prev = stack[depth];
            i++;
            continue;
        }
        if ((c >= '0' && c <= '9') || c == '%') {
            if (prev < 0) {
                rc = perr(p, col, "%s", "ring-closure number with no atom before it");
                goto done;
            }
            int n;
            if (c == '%') {
                if (!(s[i + 1] >= '0' && s[i + 1] <= '9' && s[i + 2] >= '0' && s[i + 2] <= '9')) {
                    rc = perr(p, col, "%s", "'%' must be followed by two digits");
                    goto done;
                }
                n = (s[i + 1] - '0') * 10 + (s[i + 2] - '0');
                i += 3;
            } else {
                n = c - '0';
                i++;
            }
            rc = ring_closure(p, n, col, prev, &bond);
            if (rc != ND_OK)
                goto done;
            bond = (pending){0, 0, 0, 0};
            continue;
        }
        if (c == '.') {
            if (bond.col) {
                rc = perr(p, bond.col, "%s", "bond symbol with no atom after it before '.'");
                goto done;
            }
            if (part_atoms == 0) {
                rc = perr(p, col, "%s", "empty part before '.'");
                goto done;
            }
            prev = -1;
            part_atoms = 0;
            dot_col = col;
            i++;
            continue;
        }
        /* an atom */
        int k = new_atom(p);
        if (k < 0) {
            rc = nd_fail(p->err, ND_ENOMEM, "out of memory reading SMILES");
            goto done;
        }
        if (c == '[') {
            rc = parse_bracket(p, &i, k);
            if (rc != ND_OK)
                goto done;
        } else if (!parse_organic(p, &i, k)) {
            char what[2] = {c, '\0'};
            if (c == '*')
                rc = perr(p, col, "%s", "wildcard atom '*' has no element and cannot be built");
            else if ((c >= 'A' && c <= 'Z') || (c >= 'a' && c <= 'z'))
                rc = perr(p, col,
                          "unknown element '%s' (outside [ ] only B C N O P S F Cl Br I and "
                          "aromatic b c n o p s)", what);
            else if (c > ' ' && c < 0x7f)
                rc = perr(p, col, "unexpected character '%s'", what);
            else {
                char hex[8];
                snprintf(hex, sizeof hex, "0x%02X", (unsigned)(unsigned char)c);
                rc = perr(p, col, "unexpected byte %s (not a SMILES character)", hex);
            }
            goto done;
        }
        if (bond.quad) {
            rc = perr(p, bond.col, "%s", "quadruple bond '$' is not supported");
            goto done;
        }
        patom *a = &p->atoms[k];
        if (prev >= 0) {
            a->has_prev = 1;
            if (new_bond(p, prev, k, bond.order, bond.dir, bond.col ? bond.col : a->col, 0) < 0) {
                rc = p->err ? (int)p->err->code : (int)ND_EINPUT;
                goto done;
            }
            add_written(&p->atoms[prev], k);
            add_written(a, prev);
        }
        for (int h = 0; h < a->hcount; h++)
            add_written(a, H_SLOT);
        prev = k;
        part_atoms++;
        bond = (pending){0, 0, 0, 0};
    }
    if (bond.col) {
        rc = perr(p, bond.col, "%s", "bond symbol at the end with no atom after it");
        goto done;
    }
    if (depth > 0) {
        rc = perr(p, stack_col[depth - 1], "%s", "'(' never closed by ')'");
        goto done;
    }
    if (p->natoms == 0) {
        rc = perr(p, 1, "%s", "empty SMILES");
        goto done;
    }
    if (part_atoms == 0) {
        rc = perr(p, dot_col, "%s", "'.' with no part after it");
        goto done;
    }
    for (int n = 0; n < 100; n++)
        if (p->ring[n].open) {
            char what[64];
            snprintf(what, sizeof what, "ring bond %d never closed", n);
            rc = perr(p, p->ring[n].col, "%s", what);
            goto done;
        }
done:
    free(stack);
    free(stack_col);
    free(stack_natoms);
    return rc;
}

/* ---------------------------------------------------------------- rings */

/* Marks in_ring[b] = 1 for every bond on a cycle (bonds that are not
 * bridges), with an iterative Tarjan lowlink search. adj is CSR over bond
 * indices (nbr atom in adj_atom, bond in adj_bond). */
static int mark_ring_bonds(int n, int nb, const pbond *bonds, int *in_ring)
{
    int rc = ND_ENOMEM;
    int *deg = calloc((size_t)n + 1, sizeof *deg);
    int *adj = malloc((size_t)(2 * nb + 1) * sizeof *adj);
    int *adjb = malloc((size_t)(2 * nb + 1) * sizeof *adjb);
    int *disc = malloc((size_t)n * sizeof *disc);
    int *low = malloc((size_t)n * sizeof *low);
    int *stk = malloc((size_t)n * sizeof *stk);
    int *it = malloc((size_t)n * sizeof *it);
    int *pbond_in = malloc((size_t)n * sizeof *pbond_in);
    if (!deg || !adj || !adjb || !disc || !low || !stk || !it || !pbond_in)
        goto out;
    for (int i = 0; i < nb; i++) {
        deg[bonds[i].a + 1]++;
        deg[bonds[i].b + 1]++;
        in_ring[i] = 0;
    }
    for (int i = 0; i < n; i++)
        deg[i + 1] += deg[i];
    for (int i = 0; i < n; i++)
        it[i] = deg[i];
    for (int i = 0; i < nb; i++) {
        adj[it[bonds[i].a]] = bonds[i].b;
        adjb[it[bonds[i].a]++] = i;
        adj[it[bonds[i].b]] = bonds[i].a;
        adjb[it[bonds[i].b]++] = i;
    }
    for (int i = 0; i < n; i++) {
        disc[i] = -1;
        it[i] = deg[i];
    }
    int t = 0;
    for (int r = 0; r < n; r++) {
        if (disc[r] >= 0)
            continue;
        int sp = 0;
        stk[sp++] = r;
        disc[r] = low[r] = t++;
        pbond_in[r] = -1;
        while (sp > 0) {
            int u = stk[sp - 1];
            if (it[u] < deg[u + 1]) {
                int v = adj[it[u]], b = adjb[it[u]];
                it[u]++;
                if (b == pbond_in[u])
                    continue;
                if (disc[v] < 0) {
                    disc[v] = low[v] = t++;
                    pbond_in[v] = b;
                    stk[sp++] = v;
                } else {
                    in_ring[b] = 1; /* a back edge closes a cycle */
                    if (disc[v] < low[u])
                        low[u] = disc[v];
                }
            } else {
                sp--;
                if (sp > 0) {
                    int par = stk[sp - 1];
                    if (low[u] < low[par])
                        low[par] = low[u];
                    if (low[u] <= disc[par])
                        in_ring[pbond_in[u]] = 1; /* not a bridge */
                }
            }
        }
    }
    rc = ND_OK;
out:
    free(deg);
    free(adj);
    free(adjb);
    free(disc);
    free(low);
    free(stk);
    free(it);
    free(pbond_in);
    return rc;
}

/* ---------------------------------------------------------------- kekulisation */

/* Edmonds' blossom algorithm for maximum matching in a general graph
 * (J. Edmonds, "Paths, trees, and flowers", Canad. J. Math. 17, 449, 1965),
 * in its usual array form. Works on n vertices with CSR adjacency. */
typedef struct {
    int n;
    const int *start, *adj;
    int *match, *p, *base, *q;
    char *used, *blossom, *seen;
} matcher;

/* Lowest common ancestor of a and b in the alternating tree (blossom base). */
static int mt_lca(matcher *m, int a, int b)
{
    memset(m->seen, 0, (size_t)m->n);
    for (;;) {
        a = m->base[a];
        m->seen[a] = 1;
        if (m->match[a] == -1)
            break;
        a = m->p[m->match[a]];
    }
    for (;;) {
        b = m->base[b];
        if (m->seen[b])
            return b;
        b = m->p[m->match[b]];
    }
}

/* Marks the blossom path from v up to base b, re-linking parents. */
static void mt_mark_path(matcher *m, int v, int b, int child)
{
    while (m->base[v] != b) {
        m->blossom[m->base[v]] = m->blossom[m->base[m->match[v]]] = 1;
        m->p[v] = child;
        child = m->match[v];
        v = m->p[m->match[v]];
    }
}

/* Searches an augmenting path from root; returns its free end or -1. */
static int mt_find_path(matcher *m, int root)
{
    int n = m->n;
    memset(m->used, 0, (size_t)n);
    for (int i = 0; i < n; i++) {
        m->p[i] = -1;
        m->base[i] = i;
    }
    m->used[root] = 1;
    int qh = 0, qt = 0;
    m->q[qt++] = root;
    while (qh < qt) {
        int v = m->q[qh++];
        for (int e = m->start[v]; e < m->start[v + 1]; e++) {
            int to = m->adj[e];
            if (m->base[v] == m->base[to] || m->match[v] == to)
                continue;
            if (to == root || (m->match[to] != -1 && m->p[m->match[to]] != -1)) {
                int cb = mt_lca(m, v, to);
                memset(m->blossom, 0, (size_t)n);
                mt_mark_path(m, v, cb, to);
                mt_mark_path(m, to, cb, v);
                for (int i = 0; i < n; i++)
                    if (m->blossom[m->base[i]]) {
                        m->base[i] = cb;
                        if (!m->used[i]) {
                            m->used[i] = 1;
                            m->q[qt++] = i;
                        }
                    }
            } else if (m->p[to] == -1) {
                m->p[to] = v;
                if (m->match[to] == -1)
                    return to;
                m->used[m->match[to]] = 1;
                m->q[qt++] = m->match[to];
            }
        }
    }
    return -1;
}

/* Chooses double bonds for the aromatic bonds so that every atom with
 * pi set gets exactly one. Returns ND_OK, or ND_EINPUT naming an atom that
 * cannot get one (an impossible aromatic system). */
static int kekulise(parser *p)
{
    int n = p->natoms, rc = ND_OK;
    int *vid = malloc((size_t)n * sizeof *vid);
    int *atom_of = malloc((size_t)n * sizeof *atom_of);
    int nv = 0, ne = 0;
    if (!vid || !atom_of) {
        free(vid);
        free(atom_of);
        return nd_fail(p->err, ND_ENOMEM, "out of memory reading SMILES");
    }
    for (int i = 0; i < n; i++) {
        vid[i] = -1;
        if (p->atoms[i].pi) {
            vid[i] = nv;
            atom_of[nv++] = i;
        }
    }
    if (nv == 0) {
        for (int b = 0; b < p->nbonds; b++)
            if (p->bonds[b].order == ND_BOND_AROMATIC)
                p->bonds[b].order = ND_BOND_SINGLE;
        free(vid);
        free(atom_of);
        return ND_OK;
    }
    for (int b = 0; b < p->nbonds; b++)
        if (p->bonds[b].order == ND_BOND_AROMATIC && vid[p->bonds[b].a] >= 0 &&
            vid[p->bonds[b].b] >= 0)
            ne++;
    matcher m = {0};
    m.n = nv;
    int *start = calloc((size_t)nv + 1, sizeof *start);
    int *adj = malloc((size_t)(2 * ne + 1) * sizeof *adj);
    int *fill = malloc((size_t)nv * sizeof *fill);
    m.match = malloc((size_t)nv * sizeof *m.match);
    m.p = malloc((size_t)nv * sizeof *m.p);
    m.base = malloc((size_t)nv * sizeof *m.base);
    m.q = malloc((size_t)nv * sizeof *m.q);
    m.used = malloc((size_t)nv);
    m.blossom = malloc((size_t)nv);
    m.seen = malloc((size_t)nv);
    if (!start || !adj || !fill || !m.match || !m.p || !m.base || !m.q || !m.used || !m.blossom ||
        !m.seen) {
        rc = nd_fail(p->err, ND_ENOMEM, "out of memory reading SMILES");
        goto out;
    }
    for (int b = 0; b < p->nbonds; b++) {
        const pbond *bd = &p->bonds[b];
        if (bd->order == ND_BOND_AROMATIC && vid[bd->a] >= 0 && vid[bd->b] >= 0) {
            start[vid[bd->a] + 1]++;
            start[vid[bd->b] + 1]++;
        }
    }
    for (int v = 0; v < nv; v++)
        start[v + 1] += start[v];
    for (int v = 0; v < nv; v++)
        fill[v] = start[v];
    for (int b = 0; b < p->nbonds; b++) {
        const pbond *bd = &p->bonds[b];
        if (bd->order == ND_BOND_AROMATIC && vid[bd->a] >= 0 && vid[bd->b] >= 0) {
            adj[fill[vid[bd->a]]++] = vid[bd->b];
            adj[fill[vid[bd->b]]++] = vid[bd->a];
        }
    }
    m.start = start;
    m.adj = adj;
    for (int v = 0; v < nv; v++)
        m.match[v] = -1;
    /* greedy start: atoms with fewest candidate partners first */
    for (int deg = 1; deg <= 3; deg++)
        for (int v = 0; v < nv; v++) {
            if (m.match[v] != -1 || start[v + 1] - start[v] != deg)
                continue;
            for (int e = start[v]; e < start[v + 1]; e++)
                if (m.match[adj[e]] == -1) {
                    m.match[v] = adj[e];
                    m.match[adj[e]] = v;
                    break;
                }
        }
    for (int v = 0; v < nv; v++)
        if (m.match[v] == -1)
            for (int e = start[v]; e < start[v + 1]; e++)
                if (m.match[adj[e]] == -1) {
                    m.match[v] = adj[e];
                    m.match[adj[e]] = v;
                    break;
                }
    for (int v = 0; v < nv; v++) {
        if (m.match[v] != -1)
            continue;
        int end = mt_find_path(&m, v);
        while (end != -1) {
            int pv = m.p[end], ppv = m.match[pv];
            m.match[end] = pv;
            m.match[pv] = end;
            end = ppv;
        }
    }
    for (int v = 0; v < nv; v++)
        if (m.match[v] == -1) {
            /* report the system by its first atom: a breadth-first sweep over
             * the candidate bonds from v, reusing fill as the queue and
             * m.used as the marks */
            memset(m.used, 0, (size_t)nv);
            int qh = 0, qt = 0, first_col = p->atoms[atom_of[v]].col;
            fill[qt++] = v;
            m.used[v] = 1;
            while (qh < qt) {
                int u = fill[qh++];
                if (p->atoms[atom_of[u]].col < first_col)
                    first_col = p->atoms[atom_of[u]].col;
                for (int e = start[u]; e < start[u + 1]; e++)
                    if (!m.used[adj[e]]) {
                        m.used[adj[e]] = 1;
                        fill[qt++] = adj[e];
                    }
            }
            const patom *a = &p->atoms[atom_of[v]];
            char sym[8];
            snprintf(sym, sizeof sym, "%s", nd_element_symbol(a->z));
            if (a->arom && sym[0])
                sym[0] = (char)(sym[0] - 'A' + 'a');
            char what[300];
            snprintf(what, sizeof what,
                     "impossible aromatic system: no alternating double bonds exist; aromatic "
                     "'%s' at column %d is left without one (a five-membered ring needs one [nH], "
                     "o or s; check ring sizes, charges and H counts)",
                     sym, a->col);
            rc = perr(p, first_col, "%s", what);
            goto out;
        }
    for (int b = 0; b < p->nbonds; b++) {
        pbond *bd = &p->bonds[b];
        if (bd->order != ND_BOND_AROMATIC)
            continue;
        int va = vid[bd->a], vb = vid[bd->b];
        bd->order = (va >= 0 && vb >= 0 && m.match[va] == vb) ? ND_BOND_DOUBLE : ND_BOND_SINGLE;
    }
out:
    free(vid);
    free(atom_of);
    free(start);
    free(adj);
    free(fill);
    free(m.match);
    free(m.p);
    free(m.base);
    free(m.q);
    free(m.used);
    free(m.blossom);
    free(m.seen);
    return rc;
}

/* ---------------------------------------------------------------- valence pass */

static const char *element_word(int z)
{
    switch (z) {
    case 1: return "hydrogen";
    case 5: return "boron";
    case 6: return "carbon";
    case 7: return "nitrogen";
    case 8: return "oxygen";
    case 9: return "fluorine";
    case 15: return "phosphorus";
    case 16: return "sulfur";
    case 17: return "chlorine";
    case 35: return "bromine";
    case 53: return "iodine";
    default: return nd_element_symbol(z);
    }
}

/* Works out hydrogens to add and which atoms need a double bond from
 * kekulisation, and checks valences. Aromatic bonds count 1 here; an
 * aromatic atom that still has a free valence takes one double bond. */
static int valence_pass(parser *p)
{
    int n = p->natoms;
    int *sum = calloc((size_t)n, sizeof *sum);
    int *narom = calloc((size_t)n, sizeof *narom);
    if (!sum || !narom) {
        free(sum);
        free(narom);
        return nd_fail(p->err, ND_ENOMEM, "out of memory reading SMILES");
    }
    for (int b = 0; b < p->nbonds; b++) {
        const pbond *bd = &p->bonds[b];
        int o = bd->order == ND_BOND_AROMATIC ? 1 : bd->order;
        sum[bd->a] += o;
        sum[bd->b] += o;
        if (bd->order == ND_BOND_AROMATIC) {
            narom[bd->a]++;
            narom[bd->b]++;
        }
    }
    int rc = ND_OK;
    for (int i = 0; i < n && rc == ND_OK; i++) {
        patom *a = &p->atoms[i];
        int v[4], nv, s = sum[i];
        int arom = a->arom || narom[i] > 0;
        char what[160];
        if (a->hcount < 0) { /* organic subset */
            nv = normal_valences(a->z, v);
            int chosen = -1;
            if (arom) {
                if (s + 1 <= v[0]) {
                    a->nh = v[0] - s - 1;
                    a->pi = 1;
                    chosen = v[0];
                } else {
                    for (int k = 0; k < nv; k++)
                        if (v[k] >= s) {
                            chosen = v[k];
                            break;
                        }
                    if (chosen >= 0) {
                        a->pi = chosen - s >= 1;
                        a->nh = a->pi ? chosen - s - 1 : 0;
                    }
                }
            } else {
                for (int k = 0; k < nv; k++)
                    if (v[k] >= s) {
                        chosen = v[k];
                        break;
                    }
                if (chosen >= 0)
                    a->nh = chosen - s;
            }
            if (chosen < 0) {
                /* hypervalent halogens (perchlorate) are allowed, with no H */
                int ext[4];
                int ne = charged_valences(a->z, 0, ext);
                if (ne > 0 && s <= ext[ne - 1]) {
                    a->nh = 0;
                } else {
                    snprintf(what, sizeof what, "bad valence: %s with %d bonds (at most %d)",
                             element_word(a->z), s, v[nv - 1]);
                    rc = perr(p, a->col, "%s", what);
                }
            }
        } else {
            a->nh = a->hcount;
            int t = s + a->hcount;
            nv = charged_valences(a->z, a->charge, v);
            if (nv > 0) {
                int chosen = -1;
                for (int k = 0; k < nv; k++)
                    if (v[k] >= t) {
                        chosen = v[k];
                        break;
                    }
                if (chosen < 0) {
                    if (a->charge)
                        snprintf(what, sizeof what,
                                 "bad valence: %s with charge %+d, %d bonds and %d H (at most %d)",
                                 element_word(a->z), a->charge, s, a->hcount, v[nv - 1]);
                    else
                        snprintf(what, sizeof what,
                                 "bad valence: %s with %d bonds and %d H (at most %d)",
                                 element_word(a->z), s, a->hcount, v[nv - 1]);
                    rc = perr(p, a->col, "%s", what);
                } else if (arom) {
                    a->pi = chosen - t >= 1;
                }
            } else if (arom) {
                a->pi = 1;
            }
        }
    }
    free(sum);
    free(narom);
    return rc;
}

/* ---------------------------------------------------------------- stereo */

/* Chirality in the molecule.h convention for a centre whose four
 * neighbours (atom indices, LONE_PAIR for a lone pair) were written in the
 * order w, with cls 1 for @ (anticlockwise seen from w[0]) or 2 for @@.
 *
 * Placing w[0] towards the viewer and w[1..3] anticlockwise below it makes
 * the signed volume w1.(w2 x w3) negative, so @ gives -1 for the ordering
 * (w[0]; w[1], w[2], w[3]); an even permutation keeps the sign. The
 * molecule wants the volume of the three lowest indices s0 < s1 < s2, i.e.
 * the ordering (s3; s0, s1, s2). Exported to the writer through
 * nd_smiles_chirality_from_order. */
static int chirality_from_order(const int w[4], int cls)
{
    int s[4];
    memcpy(s, w, sizeof s);
    for (int i = 1; i < 4; i++)
        for (int j = i; j > 0 && s[j - 1] > s[j]; j--) {
            int t = s[j];
            s[j] = s[j - 1];
            s[j - 1] = t;
        }
    int target[4] = {s[3], s[0], s[1], s[2]};
    int perm[4];
    for (int i = 0; i < 4; i++)
        for (int j = 0; j < 4; j++)
            if (w[j] == target[i])
                perm[i] = j;
    int inv = 0;
    for (int i = 0; i < 4; i++)
        for (int j = i + 1; j < 4; j++)
            if (perm[i] > perm[j])
                inv++;
    int sign = cls == 1 ? -1 : 1;
    return (inv % 2) ? -sign : sign;
}

/* Builds the output molecule from the parsed atoms and bonds: atoms, then
 * hydrogens, bonds, chirality and double-bond configuration. */
static int build_molecule(parser *p, nd_molecule *mol)
{
    nd_error *err = p->err;
    int n = p->natoms, rc;
    for (int i = 0; i < n; i++) {
        patom *a = &p->atoms[i];
        if ((rc = nd_molecule_add_atom(mol, a->z, 0.0, 0.0, 0.0, err)) != ND_OK)
            return rc;
        mol->formal_charge[i] = a->charge;
        mol->isotope[i] = a->iso;
        mol->charge += a->charge;
    }
    for (int b = 0; b < p->nbonds; b++) {
        if ((rc = nd_molecule_add_bond(mol, p->bonds[b].a, p->bonds[b].b, p->bonds[b].order, err)))
            return rc;
    }
    for (int i = 0; i < n; i++) {
        patom *a = &p->atoms[i];
        a->h0 = mol->natoms;
        for (int h = 0; h < a->nh; h++) {
            int hi = mol->natoms;
            if ((rc = nd_molecule_add_atom(mol, 1, 0.0, 0.0, 0.0, err)) != ND_OK)
                return rc;
            if ((rc = nd_molecule_add_bond(mol, i, hi, ND_BOND_SINGLE, err)) != ND_OK)
                return rc;
        }
    }
    mol->has_bonds = 1;
    mol->dimension = 0;
    /* tetrahedral centres */
    for (int i = 0; i < n; i++) {
        patom *a = &p->atoms[i];
        if (!a->chiral)
            continue;
        char what[120];
        if (a->nw > 4 || a->nw < 3) {
            snprintf(what, sizeof what, "tetrahedral chirality on an atom with %d neighbours "
                     "(needs 3 or 4)", a->nw);
            return perr(p, a->col, "%s", what);
        }
        int w[4], k = 0, hk = 0;
        for (int j = 0; j < a->nw; j++) {
            if (j == (a->has_prev ? 1 : 0) && a->nw == 3)
                w[k++] = LONE_PAIR;
            w[k++] = a->w[j] == H_SLOT ? a->h0 + hk++ : a->w[j];
        }
        if (k == 3)
            w[k++] = LONE_PAIR;
        mol->chirality[i] = chirality_from_order(w, a->chiral);
    }
    /* cis/trans from bond directions */
    int *start = NULL, *adj = NULL;
    if ((rc = nd_molecule_neighbours(mol, &start, &adj, err)) != ND_OK)
        return rc;
    for (int b = 0; b < p->nbonds; b++) {
        if (mol->bonds[b].order != ND_BOND_DOUBLE)
            continue;
        int ends[2] = {p->bonds[b].a, p->bonds[b].b}, ref_side[2] = {0, 0};
        for (int e = 0; e < 2 && rc == ND_OK; e++) {
            int x = ends[e], y = ends[1 - e], marked = -1, mside = 0, lowest = -1;
            for (int k = start[x]; k < start[x + 1]; k++) {
                int nbr = adj[k];
                if (nbr == y)
                    continue;
                if (lowest < 0)
                    lowest = nbr;
                if (nbr >= n)
                    continue; /* added hydrogens carry no marks */
                int bi = find_bond(p, x, nbr);
                const pbond *bd = &p->bonds[bi];
                if (!bd->dir)
                    continue;
                /* side of nbr seen from x: +1 above, -1 below */
                int side = bd->a == x ? bd->dir : -bd->dir;
                if (marked >= 0 && side == mside) {
                    rc = perr(p, p->atoms[x].col, "%s",
                              "conflicting / and \\ marks: two substituents on the same side of a "
                              "double bond");
                    break;
                }
                marked = nbr;
                mside = side;
            }
            if (marked >= 0)
                ref_side[e] = marked == lowest ? mside : -mside;
        }
        if (rc != ND_OK)
            break;
        if (ref_side[0] && ref_side[1])
            mol->bonds[b].config = ref_side[0] == ref_side[1] ? ND_DB_CIS : ND_DB_TRANS;
    }
    free(start);
    free(adj);
    return rc;
}

/* The reader: grammar, ring bonds, valences, kekulisation, then the
 * molecule with stereo (see smiles.h). */
int nd_smiles_parse(const char *smiles, nd_molecule *mol, nd_error *err)
{
    if (!smiles || !mol)
        return nd_fail(err, ND_EINVAL, "nd_smiles_parse: NULL argument");
    nd_molecule_clear(mol);
    parser p;
    memset(&p, 0, sizeof p);
    p.s = smiles;
    p.err = err;
    int rc = parse_grammar(&p);
    if (rc == ND_OK) {
        /* implicit aromatic bonds that are not ring bonds (biphenyl written
         * without '-') are single bonds */
        int *in_ring = malloc(((size_t)p.nbonds + 1) * sizeof *in_ring);
        if (!in_ring || mark_ring_bonds(p.natoms, p.nbonds, p.bonds, in_ring) != ND_OK) {
            rc = nd_fail(err, ND_ENOMEM, "out of memory reading SMILES");
        } else {
            for (int b = 0; b < p.nbonds; b++)
                if (p.bonds[b].implicit_arom && !in_ring[b])
                    p.bonds[b].order = ND_BOND_SINGLE;
        }
        free(in_ring);
    }
    if (rc == ND_OK)
        rc = valence_pass(&p);
    if (rc == ND_OK)
        rc = kekulise(&p);
    if (rc == ND_OK)
        rc = build_molecule(&p, mol);
    free(p.atoms);
    free(p.bonds);
    if (rc != ND_OK)
        nd_molecule_clear(mol);
    return rc;
}

/* ================================================================ writer */

typedef struct {
    const nd_molecule *m;
    const int *start, *adj;
    int *bond_of;      /* parallel to adj: bond index */
    char *folded;      /* hydrogen written as part of its heavy atom */
    int *nfold;        /* folded hydrogens per atom */
    int *dirside;      /* per bond: side of bonds[b].b seen from bonds[b].a */
    int *visited, *parent, *disc;
    int *ring_lists;   /* per atom: ring bonds at that atom, in written order (CSR by start) */
    int *nring;        /* ring bonds written so far at each atom */
    int *ring_digit;   /* per bond: digit while open, -1 otherwise */
    int *is_ring;      /* per bond: 1 if written as a ring closure */
    int *order_out;    /* new index of each atom */
    int next_index;
    char digits_used[100];
    char *buf;
    size_t len, cap;
    int failed;
} writer;

/* Appends s to the output buffer; sets w->failed when out of memory. */
static void w_put(writer *w, const char *s)
{
    size_t n = strlen(s);
    if (w->len + n + 1 > w->cap) {
        size_t cap = w->cap ? w->cap : 64;
        while (w->len + n + 1 > cap)
            cap *= 2;
        char *nb = realloc(w->buf, cap);
        if (!nb) {
            w->failed = 1;
            return;
        }
        w->buf = nb;
        w->cap = cap;
    }
    memcpy(w->buf + w->len, s, n + 1);
    w->len += n;
}

/* Side of atom n as seen from atom x across bond b, from dirside. */
static int side_of(const writer *w, int b, int x)
{
    return w->m->bonds[b].a == x ? w->dirside[b] : -w->dirside[b];
}

/* Records that the other atom of bond b lies on side (+1/-1) seen from x. */
static void set_side(writer *w, int b, int x, int side)
{
    w->dirside[b] = w->m->bonds[b].a == x ? side : -side;
}

/* 1 if atom x is an end of a configured double bond other than bond skip. */
static int stereo_end(const writer *w, int x, int skip)
{
    for (int k = w->start[x]; k < w->start[x + 1]; k++) {
        const nd_bond *bd = &w->m->bonds[w->bond_of[k]];
        if (w->bond_of[k] != skip && bd->order == ND_BOND_DOUBLE && bd->config != ND_DB_NONE)
            return 1;
    }
    return 0;
}

/* The side of the reference (lowest-index) substituent of double-bond end
 * x (partner y) implied by the marks already placed on x's single bonds:
 * returns 0 when there are none, 1 with *ref set when they agree, -1 when
 * two marks put x's two substituents on the same side. */
static int end_implied(const writer *w, int x, int y, int *ref)
{
    int lowest = -1, have = 0;
    for (int k = w->start[x]; k < w->start[x + 1]; k++)
        if (w->adj[k] != y) {
            lowest = w->adj[k];
            break;
        }
    for (int k = w->start[x]; k < w->start[x + 1]; k++) {
        int o = w->adj[k], bb = w->bond_of[k];
        if (o == y || !w->dirside[bb] || w->m->bonds[bb].order != ND_BOND_SINGLE)
            continue;
        int s = side_of(w, bb, x), r = o == lowest ? s : -s;
        if (have && r != *ref)
            return -1;
        *ref = r;
        have = 1;
    }
    return have;
}

/* 1 if the marks at atom o agree with every configured double bond that
 * has o as an end. */
static int marks_consistent_at(const writer *w, int o)
{
    for (int k = w->start[o]; k < w->start[o + 1]; k++) {
        const nd_bond *bd = &w->m->bonds[w->bond_of[k]];
        int r;
        if (bd->order == ND_BOND_DOUBLE && bd->config != ND_DB_NONE &&
            end_implied(w, o, w->adj[k], &r) < 0)
            return 0;
    }
    return 1;
}

/* Chooses / and \ marks for every configured double bond, in bond order.
 * An end already described by earlier marks keeps them; otherwise one of
 * its single bonds gets a mark, preferring one whose other atom is no
 * double-bond end (a shared mark constrains both bonds) and never one that
 * would contradict the marks at its other atom. Returns ND_OK, or ND_EINPUT
 * when the configurations cannot all be expressed this way (a ring of
 * conjugated configured bonds with its hydrogens folded: the caller then
 * retries with them written). */
static int assign_directions(writer *w, nd_error *err)
{
    const nd_molecule *m = w->m;
    for (int b = 0; b < m->nbonds; b++) {
        const nd_bond *bd = &m->bonds[b];
        if (bd->order != ND_BOND_DOUBLE || bd->config == ND_DB_NONE)
            continue;
        int ends[2] = {bd->a, bd->b}, lowest[2], cand[2][8], ncand[2] = {0, 0};
        int fixed[2] = {0, 0}, have[2] = {0, 0}, ok = 1;
        for (int e = 0; e < 2; e++) {
            int x = ends[e], y = ends[1 - e];
            lowest[e] = -1;
            for (int k = w->start[x]; k < w->start[x + 1]; k++) {
                int nb = w->adj[k], bb = w->bond_of[k];
                if (nb == y)
                    continue;
                if (lowest[e] < 0)
                    lowest[e] = nb;
                if (!w->folded[nb] && m->bonds[bb].order == ND_BOND_SINGLE && ncand[e] < 8)
                    cand[e][ncand[e]++] = bb;
            }
            have[e] = end_implied(w, x, y, &fixed[e]);
            if (have[e] < 0)
                ok = 0;
        }
        if (ok && (!ncand[0] || !ncand[1]))
            continue; /* an end with only hydrogens folded: not a stereo bond */
        int want_same = bd->config == ND_DB_CIS;
        int r0 = have[0] ? fixed[0] : 1;
        int r1 = have[1] ? fixed[1] : (want_same ? r0 : -r0);
        if (have[1] && !have[0])
            r0 = want_same ? r1 : -r1;
        if ((r0 == r1) != want_same)
            ok = 0;
        int ref[2] = {r0, r1};
        for (int e = 0; e < 2 && ok; e++) {
            if (have[e])
                continue;
            int x = ends[e], placed = 0;
            for (int pass = 0; pass < 2 && !placed; pass++)
                for (int c = 0; c < ncand[e] && !placed; c++) {
                    int bb = cand[e][c];
                    int o = m->bonds[bb].a == x ? m->bonds[bb].b : m->bonds[bb].a;
                    if (pass == 0 && stereo_end(w, o, b))
                        continue;
                    set_side(w, bb, x, o == lowest[e] ? ref[e] : -ref[e]);
                    if (marks_consistent_at(w, o))
                        placed = 1;
                    else
                        w->dirside[bb] = 0;
                }
            if (!placed)
                ok = 0;
        }
        if (!ok)
            return nd_fail(err, ND_EINPUT,
                           "cannot write the configurations of conjugated double bonds around "
                           "atoms %d and %d in SMILES", bd->a + 1, bd->b + 1);
    }
    return ND_OK;
}

/* First pass: depth-first tree (parent, discovery order) and ring-closure
 * bonds from root, with an explicit stack so long chains cannot exhaust
 * the C stack. ND_OK or ND_ENOMEM. */
static int w_dfs(writer *w, int root, int *counter)
{
    int n = w->m->natoms;
    int *stk = malloc((size_t)n * sizeof *stk), *cur = malloc((size_t)n * sizeof *cur);
    if (!stk || !cur) {
        free(stk);
        free(cur);
        return ND_ENOMEM;
    }
    int sp = 0;
    stk[sp++] = root;
    w->visited[root] = 1;
    w->disc[root] = (*counter)++;
    cur[root] = w->start[root];
    while (sp > 0) {
        int u = stk[sp - 1];
        if (cur[u] == w->start[u + 1]) {
            sp--;
            continue;
        }
        int k = cur[u]++;
        int v = w->adj[k], b = w->bond_of[k];
        if (w->folded[v] || v == w->parent[u])
            continue;
        if (!w->visited[v]) {
            w->parent[v] = u;
            w->visited[v] = 1;
            w->disc[v] = (*counter)++;
            cur[v] = w->start[v];
            stk[sp++] = v;
        } else if (w->disc[v] < w->disc[u] && !w->is_ring[b]) {
            w->is_ring[b] = 1;
        }
    }
    free(stk);
    free(cur);
    return ND_OK;
}

/* Symbol text for atom i (organic subset when the reader would give the
 * same hydrogens, else a bracket atom with the chirality mark cls). */
static void w_atom(writer *w, int i, int cls)
{
    const nd_molecule *m = w->m;
    int z = m->z[i], q = m->formal_charge[i], iso = m->isotope[i], nh = w->nfold[i];
    const char *sym = nd_element_symbol(z);
    int organic = 0;
    if (!cls && !q && !iso && (z == 5 || z == 6 || z == 7 || z == 8 || z == 9 || z == 15 ||
                               z == 16 || z == 17 || z == 35 || z == 53)) {
        int s = 0, v[4], nv = normal_valences(z, v);
        for (int k = w->start[i]; k < w->start[i + 1]; k++)
            if (!w->folded[w->adj[k]])
                s += m->bonds[w->bond_of[k]].order;
        for (int k = 0; k < nv; k++)
            if (v[k] >= s) {
                organic = (v[k] - s == nh);
                break;
            }
        if (nh == 0 && s > v[nv - 1])
            organic = 0;
    }
    char buf[48];
    if (organic) {
        w_put(w, sym);
        return;
    }
    int len = 0;
    len += snprintf(buf + len, sizeof buf - (size_t)len, "[");
    if (iso)
        len += snprintf(buf + len, sizeof buf - (size_t)len, "%d", iso);
    len += snprintf(buf + len, sizeof buf - (size_t)len, "%s%s", sym,
                    cls == 1 ? "@" : cls == 2 ? "@@" : "");
    if (nh == 1)
        len += snprintf(buf + len, sizeof buf - (size_t)len, "H");
    else if (nh > 1)
        len += snprintf(buf + len, sizeof buf - (size_t)len, "H%d", nh);
    if (q == 1 || q == -1)
        len += snprintf(buf + len, sizeof buf - (size_t)len, "%c", q > 0 ? '+' : '-');
    else if (q)
        len += snprintf(buf + len, sizeof buf - (size_t)len, "%c%d", q > 0 ? '+' : '-', q > 0 ? q : -q);
    snprintf(buf + len, sizeof buf - (size_t)len, "]");
    w_put(w, buf);
}

/* Bond symbol for bond b written from atom u to atom v. */
static void w_bond_symbol(writer *w, int b, int u)
{
    const nd_bond *bd = &w->m->bonds[b];
    if (bd->order == ND_BOND_DOUBLE)
        w_put(w, "=");
    else if (bd->order == ND_BOND_TRIPLE)
        w_put(w, "#");
    else if (w->dirside[b])
        w_put(w, side_of(w, b, u) > 0 ? "/" : "\\");
}

/* 1 if v is a depth-first child of u written as a branch or chain bond. */
static int w_is_child(const writer *w, int u, int k)
{
    int v = w->adj[k], b = w->bond_of[k];
    return !w->folded[v] && !w->is_ring[b] && w->parent[v] == u;
}

/* Second pass, one atom: its symbol (with the chirality mark for the
 * order it is written in) and its ring-closure digits. Returns the number
 * of its children, or -1 after a failure (w->failed set). */
static int w_emit_atom(writer *w, int u, nd_error *err)
{
    const nd_molecule *m = w->m;
    if (w->failed)
        return -1;
    w->order_out[u] = w->next_index++;
    /* ring bonds at u: closings (partner written earlier) then openings */
    int rb[64], nrb = 0, children[64], nch = 0;
    for (int pass = 0; pass < 2; pass++)
        for (int k = w->start[u]; k < w->start[u + 1]; k++) {
            int v = w->adj[k], b = w->bond_of[k];
            if (!w->is_ring[b] || w->folded[v])
                continue;
            int closing = w->disc[v] < w->disc[u];
            if ((pass == 0) == closing && nrb < 64)
                rb[nrb++] = b;
        }
    for (int k = w->start[u]; k < w->start[u + 1]; k++)
        if (w_is_child(w, u, k) && nch < 64)
            children[nch++] = w->adj[k];
    if (nrb >= 64 || nch >= 64) {
        w->failed = 2;
        nd_fail(err, ND_EINPUT, "atom %d has too many bonds to write as SMILES", u + 1);
        return -1;
    }
    int cls = 0;
    if (m->chirality[u]) {
        int wo[4], k = 0, nn = 0, hs[8], nhs = 0;
        for (int j = w->start[u]; j < w->start[u + 1]; j++) {
            nn++;
            if (w->folded[w->adj[j]] && nhs < 8)
                hs[nhs++] = w->adj[j];
        }
        if (nn == 3 || nn == 4) {
            int order[6], no = 0;
            if (w->parent[u] >= 0)
                order[no++] = w->parent[u];
            if (nn == 3)
                order[no++] = LONE_PAIR;
            for (int h = 0; h < nhs; h++)
                order[no++] = hs[h];
            for (int r = 0; r < nrb; r++)
                order[no++] = m->bonds[rb[r]].a == u ? m->bonds[rb[r]].b : m->bonds[rb[r]].a;
            for (int c = 0; c < nch; c++)
                order[no++] = children[c];
            if (no == 4) {
                for (k = 0; k < 4; k++)
                    wo[k] = order[k];
                cls = chirality_from_order(wo, 1) == m->chirality[u] ? 1 : 2;
            }
        }
    }
    w_atom(w, u, cls);
    for (int r = 0; r < nrb; r++) {
        int b = rb[r];
        int v = m->bonds[b].a == u ? m->bonds[b].b : m->bonds[b].a;
        char num[8];
        if (w->disc[v] < w->disc[u]) { /* closing: symbol was written at the opening */
            int d = w->ring_digit[b];
            snprintf(num, sizeof num, d < 10 ? "%d" : "%%%02d", d);
            w_put(w, num);
            w->digits_used[d] = 0;
            w->ring_digit[b] = -1;
        } else {
            int d = 1;
            while (d < 100 && w->digits_used[d])
                d++;
            if (d == 100)
                d = 0;
            if (w->digits_used[d]) {
                w->failed = 2;
                nd_fail(err, ND_EINPUT, "more than 100 rings open at once; cannot write SMILES");
                return -1;
            }
            w->digits_used[d] = 1;
            w->ring_digit[b] = d;
            w_bond_symbol(w, b, u);
            snprintf(num, sizeof num, d < 10 ? "%d" : "%%%02d", d);
            w_put(w, num);
        }
    }
    return nch;
}

/* Second pass: writes the tree from root, branches in parentheses except
 * the last child, with an explicit stack (no recursion). */
static int w_emit(writer *w, int root, nd_error *err)
{
    typedef struct {
        int u, cursor, done, nch, paren;
    } frame;
    frame *st = malloc((size_t)w->m->natoms * sizeof *st);
    if (!st) {
        w->failed = 1;
        return ND_ENOMEM;
    }
    int sp = 0, nch = w_emit_atom(w, root, err);
    if (nch >= 0)
        st[sp++] = (frame){root, w->start[root], 0, nch, 0};
    while (sp > 0 && !w->failed) {
        frame *f = &st[sp - 1];
        while (f->cursor < w->start[f->u + 1] && !w_is_child(w, f->u, f->cursor))
            f->cursor++;
        if (f->cursor == w->start[f->u + 1]) {
            if (f->paren)
                w_put(w, ")");
            sp--;
            continue;
        }
        int k = f->cursor++, v = w->adj[k], u = f->u;
        int last = ++f->done == f->nch;
        if (!last)
            w_put(w, "(");
        w_bond_symbol(w, w->bond_of[k], u);
        int c = w_emit_atom(w, v, err);
        if (c < 0)
            break;
        st[sp++] = (frame){v, w->start[v], 0, c, !last};
    }
    free(st);
    return w->failed ? ND_EINPUT : ND_OK;
}

int nd_smiles_write_mapped(const nd_molecule *mol, char **out, int *order, nd_error *err)
{
    if (!mol || !out)
        return nd_fail(err, ND_EINVAL, "nd_smiles_write: NULL argument");
    *out = NULL;
    int n = mol->natoms, rc;
    if (n == 0)
        return nd_fail(err, ND_EINPUT, "cannot write an empty molecule as SMILES");
    for (int b = 0; b < mol->nbonds; b++)
        if (mol->bonds[b].order == ND_BOND_AROMATIC)
            return nd_fail(err, ND_EINPUT,
                           "bond %d-%d is aromatic; SMILES is written from a kekulised molecule",
                           mol->bonds[b].a + 1, mol->bonds[b].b + 1);
    writer w;
    memset(&w, 0, sizeof w);
    w.m = mol;
    int *start = NULL, *adj = NULL;
    if ((rc = nd_molecule_neighbours(mol, &start, &adj, err)) != ND_OK)
        return rc;
    w.start = start;
    w.adj = adj;
    size_t nn = (size_t)n, nb = (size_t)mol->nbonds + 1;
    w.bond_of = malloc((size_t)(start[n] + 1) * sizeof *w.bond_of);
    w.folded = calloc(nn, 1);
    w.nfold = calloc(nn, sizeof *w.nfold);
    w.dirside = calloc(nb, sizeof *w.dirside);
    w.visited = calloc(nn, sizeof *w.visited);
    w.parent = malloc(nn * sizeof *w.parent);
    w.disc = malloc(nn * sizeof *w.disc);
    w.ring_digit = malloc(nb * sizeof *w.ring_digit);
    w.is_ring = calloc(nb, sizeof *w.is_ring);
    w.order_out = malloc(nn * sizeof *w.order_out);
    if (!w.bond_of || !w.folded || !w.nfold || !w.dirside || !w.visited || !w.parent || !w.disc ||
        !w.ring_digit || !w.is_ring || !w.order_out) {
        rc = nd_fail(err, ND_ENOMEM, "out of memory writing SMILES");
        goto out;
    }
    for (int i = 0; i < n; i++) {
        w.parent[i] = -1;
        for (int k = start[i]; k < start[i + 1]; k++)
            w.bond_of[k] = -1;
    }
    for (int b = 0; b < mol->nbonds; b++) {
        int ends[2] = {mol->bonds[b].a, mol->bonds[b].b};
        for (int e = 0; e < 2; e++)
            for (int k = start[ends[e]]; k < start[ends[e] + 1]; k++)
                if (adj[k] == ends[1 - e] && w.bond_of[k] < 0) {
                    w.bond_of[k] = b;
                    break;
                }
    }
    for (int b = 0; b < mol->nbonds; b++)
        w.ring_digit[b] = -1;
    /* hydrogens folded into their heavy atom: plain H on a heavy atom,
     * single bond, unless it is the only substituent a configured double
     * bond end could be described by. If the marks then contradict (a ring
     * of conjugated configured bonds), a second try keeps every H on a
     * configured double-bond end, so each bond can be marked on its own. */
    for (int mode = 0; mode < 2; mode++) {
        memset(w.folded, 0, nn);
        memset(w.nfold, 0, nn * sizeof *w.nfold);
        memset(w.dirside, 0, nb * sizeof *w.dirside);
        for (int h = 0; h < n; h++) {
            if (mol->z[h] != 1 || mol->isotope[h] || mol->formal_charge[h] || mol->chirality[h] ||
                start[h + 1] - start[h] != 1)
                continue;
            int x = adj[start[h]], b = w.bond_of[start[h]];
            if (mol->z[x] == 1 || mol->bonds[b].order != ND_BOND_SINGLE)
                continue;
            int keep = 0;
            for (int k = start[x]; k < start[x + 1]; k++) {
                const nd_bond *db = &mol->bonds[w.bond_of[k]];
                if (db->order == ND_BOND_DOUBLE && db->config != ND_DB_NONE) {
                    int others = 0;
                    for (int j = start[x]; j < start[x + 1]; j++)
                        if (adj[j] != adj[k] && adj[j] != h && mol->z[adj[j]] != 1)
                            others++;
                    if (!others || mode == 1)
                        keep = 1;
                }
            }
            if (!keep) {
                w.folded[h] = 1;
                w.nfold[x]++;
            }
        }
        rc = assign_directions(&w, err);
        if (rc == ND_OK)
            break;
        if (mode == 1)
            goto out;
    }
    int counter = 0;
    for (int i = 0; i < n; i++)
        if (!w.folded[i] && !w.visited[i])
            if (w_dfs(&w, i, &counter) != ND_OK) {
                rc = nd_fail(err, ND_ENOMEM, "out of memory writing SMILES");
                goto out;
            }
    int first = 1;
    for (int i = 0; i < n; i++)
        w.order_out[i] = -1;
    for (int i = 0; i < n; i++) {
        if (w.folded[i] || w.parent[i] != -1 || w.order_out[i] >= 0)
            continue;
        if (!first)
            w_put(&w, ".");
        first = 0;
        w_emit(&w, i, err);
        if (w.failed)
            break;
    }
    if (w.failed) {
        if (w.failed == 2)
            rc = err ? (int)err->code : (int)ND_EINPUT;
        else
            rc = nd_fail(err, ND_ENOMEM, "out of memory writing SMILES");
        goto out;
    }
    /* folded hydrogens follow, grouped by heavy atom in written order */
    {
        int *by_new = malloc(nn * sizeof *by_new);
        if (!by_new) {
            rc = nd_fail(err, ND_ENOMEM, "out of memory writing SMILES");
            goto out;
        }
        for (int i = 0; i < n; i++)
            if (!w.folded[i])
                by_new[w.order_out[i]] = i;
        int heavy = w.next_index;
        for (int k = 0; k < heavy; k++) {
            int x = by_new[k];
            for (int j = start[x]; j < start[x + 1]; j++)
                if (w.folded[adj[j]])
                    w.order_out[adj[j]] = w.next_index++;
        }
        free(by_new);
    }
    if (order)
        memcpy(order, w.order_out, nn * sizeof *order);
    *out = w.buf;
    w.buf = NULL;
    rc = ND_OK;
out:
    free(start);
    free(adj);
    free(w.bond_of);
    free(w.folded);
    free(w.nfold);
    free(w.dirside);
    free(w.visited);
    free(w.parent);
    free(w.disc);
    free(w.ring_digit);
    free(w.is_ring);
    free(w.order_out);
    free(w.buf);
    return rc;
}

int nd_smiles_write(const nd_molecule *mol, char **out, nd_error *err)
{
    return nd_smiles_write_mapped(mol, out, NULL, err);
}
