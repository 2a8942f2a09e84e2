/* JSON Lines datasets of labelled structures: reader (parallel text parse,
 * binary cache) and appending writer. Format described in dataset.h. */
#include "potential/dataset.h"

#include "core/elements.h"
#include "core/report.h"
#include "core/units.h"

#include <cjson/cJSON.h>

#include <errno.h>
#include <fcntl.h>
#include <math.h>
#include <stdarg.h>
#include <stdlib.h>
#include <string.h>
#include <strings.h>
#include <sys/mman.h>
#include <sys/stat.h>
#include <unistd.h>

/* ------------------------------------------------------------------ units */

/* Factor converting energy unit name to kcal/mol; 0 if unknown. */
static double energy_factor(const char *u)
{
    if (!strcasecmp(u, "kcal/mol"))
        return 1.0;
    if (!strcasecmp(u, "kJ/mol"))
        return ND_KJMOL_KCALMOL;
    if (!strcasecmp(u, "hartree"))
        return ND_HARTREE_KCALMOL;
    if (!strcasecmp(u, "eV"))
        return ND_EV_KCALMOL;
    return 0.0;
}

/* Factor converting length unit name to angstrom; 0 if unknown. */
static double length_factor(const char *u)
{
    if (!strcasecmp(u, "angstrom"))
        return 1.0;
    if (!strcasecmp(u, "bohr"))
        return ND_BOHR_ANGSTROM;
    return 0.0;
}

/* ------------------------------------------------------------------- hash */

/* One 64-bit mixing step (the splitmix64 finaliser applied to h ^ w). */
static uint64_t mix64(uint64_t h, uint64_t w)
{
    uint64_t x = h ^ (w + 0x9e3779b97f4a7c15ULL + (h << 6) + (h >> 2));
    x = (x ^ (x >> 30)) * 0xbf58476d1ce4e5b9ULL;
    x = (x ^ (x >> 27)) * 0x94d049bb133111ebULL;
    return x ^ (x >> 31);
}

uint64_t nd_dataset_hash(int natoms, const int *z, const double *xyz, int charge, int multiplicity)
{
    uint64_t h = mix64(0x6e61646972ULL, (uint64_t)(uint32_t)natoms);
    for (int i = 0; i < natoms; i++)
        h = mix64(h, (uint64_t)(uint32_t)z[i]);
    for (int i = 0; i < 3 * natoms; i++) {
        double v = xyz[i] == 0.0 ? 0.0 : xyz[i]; /* -0.0 and 0.0 are one structure */
        uint64_t bits;
        memcpy(&bits, &v, sizeof bits);
        h = mix64(h, bits);
    }
    h = mix64(h, (uint64_t)(uint32_t)charge);
    return mix64(h, (uint64_t)(uint32_t)multiplicity);
}

void nd_dataset_format_id(uint64_t id, char buf[17])
{
    static const char hex[] = "0123456789abcdef";
    for (int i = 0; i < 16; i++)
        buf[i] = hex[(id >> (60 - 4 * i)) & 0xf];
    buf[16] = '\0';
}

/* Parses 16 hexadecimal digits; 0 on success. */
static int parse_id(const char *s, uint64_t *out)
{
    uint64_t v = 0;
    int i = 0;
    for (; s[i] && i < 17; i++) {
        int c = s[i], d;
        if (c >= '0' && c <= '9')
            d = c - '0';
        else if (c >= 'a' && c <= 'f')
            d = c - 'a' + 10;
        else if (c >= 'A' && c <= 'F')
            d = c - 'A' + 10;
        else
            return -1;
        v = (v << 4) | (uint64_t)d;
    }
    if (i != 16)
        return -1;
    *out = v;
    return 0;
}

/* Hash of a whole byte buffer, 8 bytes at a time, for validating the cache. */
static uint64_t hash_bytes(const unsigned char *p, size_t n)
{
    uint64_t h = mix64(0x636163686531ULL, (uint64_t)n);
    size_t i = 0;
    uint64_t a = 0, b = 0;
    for (; i + 16 <= n; i += 16) { /* two lanes keep the multiply chains independent */
        uint64_t w1, w2;
        memcpy(&w1, p + i, 8);
        memcpy(&w2, p + i + 8, 8);
        a = (a ^ w1) * 0x9e3779b97f4a7c15ULL;
        a ^= a >> 29;
        b = (b ^ w2) * 0xc2b2ae3d27d4eb4fULL;
        b ^= b >> 31;
    }
    for (; i < n; i++)
        a = (a ^ p[i]) * 0x100000001b3ULL;
    return mix64(mix64(h, a), b);
}

/* -------------------------------------------------------- string interning */

typedef struct strtab {
    char **s;      /* strings, owned */
    int n, cap;
    int *slot;     /* open addressing: index into s, or -1 */
    size_t nslot;  /* power of two */
} strtab;

static uint64_t hash_str(const char *s)
{
    uint64_t h = 0xcbf29ce484222325ULL;
    for (; *s; s++)
        h = (h ^ (unsigned char)*s) * 0x100000001b3ULL;
    return h;
}

static void strtab_free(strtab *t)
{
    for (int i = 0; i < t->n; i++)
        free(t->s[i]);
    free(t->s);
    free(t->slot);
    memset(t, 0, sizeof *t);
}

/* Grows the slot table to hold at least 2 * want entries. -1 on no memory. */
static int strtab_rehash(strtab *t, size_t want)
{
    size_t ns = 16;
    while (ns < 2 * want)
        ns *= 2;
    int *slot = malloc(ns * sizeof *slot);
    if (!slot)
        return -1;
    for (size_t i = 0; i < ns; i++)
        slot[i] = -1;
    for (int i = 0; i < t->n; i++) {
        size_t h = (size_t)hash_str(t->s[i]) & (ns - 1);
        while (slot[h] >= 0)
            h = (h + 1) & (ns - 1);
        slot[h] = i;
    }
    free(t->slot);
    t->slot = slot;
    t->nslot = ns;
    return 0;
}

/* Index of s in t, adding a copy when new; -1 on no memory. */
static int strtab_intern(strtab *t, const char *s)
{
    if ((size_t)(t->n + 1) * 2 > t->nslot && strtab_rehash(t, (size_t)t->n + 1) < 0)
        return -1;
    size_t h = (size_t)hash_str(s) & (t->nslot - 1);
    while (t->slot[h] >= 0) {
        if (strcmp(t->s[t->slot[h]], s) == 0)
            return t->slot[h];
        h = (h + 1) & (t->nslot - 1);
    }
    if (t->n == t->cap) {
        int cap = t->cap ? 2 * t->cap : 64;
        char **ns = realloc(t->s, (size_t)cap * sizeof *ns);
        if (!ns)
            return -1;
        t->s = ns;
        t->cap = cap;
    }
    char *c = strdup(s);
    if (!c)
        return -1;
    t->s[t->n] = c;
    t->slot[h] = t->n;
    return t->n++;
}

/* ---------------------------------------------------------------- dataset */

struct nd_dataset {
    long n, total;        /* structures, atoms */
    long *start;          /* n + 1 atom offsets */
    int *z;               /* total */
    double *xyz;          /* 3 total */
    double *forces;       /* 3 total, zero where a structure has none */
    unsigned char *has_forces; /* n */
    double *energy;       /* n */
    int *charge, *mult;   /* n */
    int *key;             /* n: index into keys */
    int *source, *tag;    /* n: index into labels, or -1 */
    uint64_t *id;         /* n */
    uint64_t *sorted_id;  /* n, ascending */
    strtab keys, labels;
};

void nd_dataset_free(nd_dataset *d)
{
    if (!d)
        return;
    free(d->start);
    free(d->z);
    free(d->xyz);
    free(d->forces);
    free(d->has_forces);
    free(d->energy);
    free(d->charge);
    free(d->mult);
    free(d->key);
    free(d->source);
    free(d->tag);
    free(d->id);
    free(d->sorted_id);
    strtab_free(&d->keys);
    strtab_free(&d->labels);
    free(d);
}

long nd_dataset_count(const nd_dataset *d) { return d->n; }
long nd_dataset_atoms(const nd_dataset *d) { return d->total; }
int nd_dataset_key_count(const nd_dataset *d) { return d->keys.n; }
int nd_dataset_key_index(const nd_dataset *d, long i) { return d->key[i]; }
const char *nd_dataset_key_name(const nd_dataset *d, int k) { return d->keys.s[k]; }

void nd_dataset_get(const nd_dataset *d, long i, nd_dataset_entry *e)
{
    long a = d->start[i];
    e->natoms = (int)(d->start[i + 1] - a);
    e->z = d->z + a;
    e->xyz = d->xyz + 3 * a;
    e->energy = d->energy[i];
    e->forces = d->has_forces[i] ? d->forces + 3 * a : NULL;
    e->charge = d->charge[i];
    e->multiplicity = d->mult[i];
    e->key = d->keys.s[d->key[i]];
    e->source = d->source[i] >= 0 ? d->labels.s[d->source[i]] : NULL;
    e->tag = d->tag[i] >= 0 ? d->labels.s[d->tag[i]] : NULL;
    e->id = d->id[i];
}

int nd_dataset_has_id(const nd_dataset *d, uint64_t id)
{
    long lo = 0, hi = d->n;
    while (lo < hi) {
        long mid = lo + (hi - lo) / 2;
        if (d->sorted_id[mid] < id)
            lo = mid + 1;
        else
            hi = mid;
    }
    return lo < d->n && d->sorted_id[lo] == id;
}

static int cmp_u64(const void *a, const void *b)
{
    uint64_t x = *(const uint64_t *)a, y = *(const uint64_t *)b;
    return x < y ? -1 : x > y;
}

/* Allocates the per-structure and per-atom arrays for n structures and
 * total atoms. -1 on no memory. */
static int dataset_alloc(nd_dataset *d, long n, long total)
{
    size_t sn = (size_t)n + 1, st = (size_t)total + 1;
    d->start = malloc((sn + 1) * sizeof *d->start);
    d->z = malloc(st * sizeof *d->z);
    d->xyz = malloc(3 * st * sizeof *d->xyz);
    d->forces = malloc(3 * st * sizeof *d->forces);
    d->has_forces = malloc(sn);
    d->energy = malloc(sn * sizeof *d->energy);
    d->charge = malloc(sn * sizeof *d->charge);
    d->mult = malloc(sn * sizeof *d->mult);
    d->key = malloc(sn * sizeof *d->key);
    d->source = malloc(sn * sizeof *d->source);
    d->tag = malloc(sn * sizeof *d->tag);
    d->id = malloc(sn * sizeof *d->id);
    d->sorted_id = malloc(sn * sizeof *d->sorted_id);
    if (!d->start || !d->z || !d->xyz || !d->forces || !d->has_forces || !d->energy || !d->charge ||
        !d->mult || !d->key || !d->source || !d->tag || !d->id || !d->sorted_id)
        return -1;
    d->n = n;
    d->total = total;
    return 0;
}

/* ------------------------------------------------------------ line parser */

/* One parsed line before merging. */
typedef struct parsed {
    int kind;              /* 0 structure, 1 blank, 2 bad */
    int natoms;
    int *z;
    double *xyz, *forces;  /* forces NULL when absent */
    double energy;
    int charge, mult;
    char *key, *source, *tag;
    uint64_t id;
    char why[200];
} parsed;

static void parsed_free(parsed *p)
{
    free(p->z);
    free(p->xyz);
    free(p->forces);
    free(p->key);
    free(p->source);
    free(p->tag);
    p->z = NULL;
    p->xyz = p->forces = NULL;
    p->key = p->source = p->tag = NULL;
}

/* Unit factors from a header or structure object: members energy_unit and
 * length_unit update *fe and *fl when present. -1 with a reason if a unit is
 * unknown or not a string. */
static int read_units(const cJSON *o, double *fe, double *fl, char *why, size_t nwhy)
{
    const cJSON *eu = cJSON_GetObjectItemCaseSensitive(o, "energy_unit");
    const cJSON *lu = cJSON_GetObjectItemCaseSensitive(o, "length_unit");
    if (eu) {
        double f = cJSON_IsString(eu) ? energy_factor(eu->valuestring) : 0.0;
        if (f == 0.0) {
            snprintf(why, nwhy, "unknown energy_unit (expected kcal/mol, kJ/mol, hartree or eV)");
            return -1;
        }
        *fe = f;
    }
    if (lu) {
        double f = cJSON_IsString(lu) ? length_factor(lu->valuestring) : 0.0;
        if (f == 0.0) {
            snprintf(why, nwhy, "unknown length_unit (expected angstrom or bohr)");
            return -1;
        }
        *fl = f;
    }
    return 0;
}

/* --- A strict JSON reader for one structure line ----------------------
 *
 * Structure lines are read by this small recursive-descent parser rather
 * than by building a cJSON tree: it follows the JSON grammar (RFC 8259)
 * exactly, but converts numbers straight into the arrays they belong to and
 * skips members it does not know, which makes loading several times faster.
 * Numbers are converted correctly rounded: by Clinger's exact fast path
 * (W. D. Clinger, "How to read floating point numbers accurately", PLDI
 * 1990) when the decimal significand is below 2^53 and the power of ten at
 * most 22, and by strtod otherwise. */

/* Writes a reason into why and returns -1. */
static int fail_why(char *why, size_t nwhy, const char *fmt, ...) __attribute__((format(printf, 3, 4)));
static int fail_why(char *why, size_t nwhy, const char *fmt, ...)
{
    va_list ap;
    va_start(ap, fmt);
    vsnprintf(why, nwhy, fmt, ap);
    va_end(ap);
    return -1;
}

typedef struct jp {
    const char *p, *end;
    char *why;
    size_t nwhy;
    const char *line;
} jp;

/* Records a syntax error at the current column; returns -1. */
static int jp_syntax(jp *j, const char *what)
{
    snprintf(j->why, j->nwhy, "not valid JSON at column %ld: %s", (long)(j->p - j->line) + 1, what);
    return -1;
}

static void jp_ws(jp *j)
{
    while (j->p < j->end && (*j->p == ' ' || *j->p == '\t' || *j->p == '\r' || *j->p == '\n'))
        j->p++;
}

static int jp_lit(jp *j, char c)
{
    jp_ws(j);
    if (j->p < j->end && *j->p == c) {
        j->p++;
        return 1;
    }
    return 0;
}

/* A JSON number at j->p into *v (correctly rounded). */
static int jp_number(jp *j, double *v)
{
    static const double pow10[23] = {1e0,  1e1,  1e2,  1e3,  1e4,  1e5,  1e6,  1e7,
                                     1e8,  1e9,  1e10, 1e11, 1e12, 1e13, 1e14, 1e15,
                                     1e16, 1e17, 1e18, 1e19, 1e20, 1e21, 1e22};
    const char *s = j->p, *e = j->end, *q = s;
    int neg = 0;
    if (q < e && *q == '-') {
        neg = 1;
        q++;
    }
    if (q >= e || *q < '0' || *q > '9')
        return jp_syntax(j, "expected a number (NaN and Infinity are not JSON numbers)");
    uint64_t m = 0;
    int digits = 0, exp10 = 0;
    if (*q == '0') {
        q++;
    } else {
        for (; q < e && *q >= '0' && *q <= '9'; q++) {
            if (digits < 19) {
                m = 10 * m + (uint64_t)(*q - '0');
                if (m)
                    digits++;
            } else {
                exp10++;
                digits++;
            }
        }
    }
    if (q < e && *q == '.') {
        q++;
        if (q >= e || *q < '0' || *q > '9')
            return jp_syntax(j, "expected digits after '.'");
        for (; q < e && *q >= '0' && *q <= '9'; q++) {
            if (digits < 19) {
                m = 10 * m + (uint64_t)(*q - '0');
                if (m)
                    digits++;
                exp10--;
            } else {
                digits++;
            }
        }
    }
    if (q < e && (*q == 'e' || *q == 'E')) {
        q++;
        int eneg = 0, ev = 0;
        if (q < e && (*q == '+' || *q == '-'))
            eneg = *q++ == '-';
        if (q >= e || *q < '0' || *q > '9')
            return jp_syntax(j, "expected digits in the exponent");
        for (; q < e && *q >= '0' && *q <= '9'; q++)
            if (ev < 100000)
                ev = 10 * ev + (*q - '0');
        exp10 += eneg ? -ev : ev;
    }
    j->p = q;
    if (digits <= 19 && m < ((uint64_t)1 << 53) && exp10 >= -22 && exp10 <= 22) {
        double d = (double)m;
        d = exp10 < 0 ? d / pow10[-exp10] : d * pow10[exp10];
        *v = neg ? -d : d;
        return 0;
    }
    char tmp[64];
    size_t len = (size_t)(q - s);
    if (len < sizeof tmp) {
        memcpy(tmp, s, len);
        tmp[len] = '\0';
        *v = strtod(tmp, NULL);
    } else {
        char *big = strndup(s, len);
        if (!big)
            return jp_syntax(j, "out of memory");
        *v = strtod(big, NULL);
        free(big);
    }
    return 0;
}

/* Appends the UTF-8 encoding of code point c. */
static size_t utf8_put(char *o, unsigned c)
{
    if (c < 0x80) {
        o[0] = (char)c;
        return 1;
    }
    if (c < 0x800) {
        o[0] = (char)(0xc0 | (c >> 6));
        o[1] = (char)(0x80 | (c & 0x3f));
        return 2;
    }
    if (c < 0x10000) {
        o[0] = (char)(0xe0 | (c >> 12));
        o[1] = (char)(0x80 | ((c >> 6) & 0x3f));
        o[2] = (char)(0x80 | (c & 0x3f));
        return 3;
    }
    o[0] = (char)(0xf0 | (c >> 18));
    o[1] = (char)(0x80 | ((c >> 12) & 0x3f));
    o[2] = (char)(0x80 | ((c >> 6) & 0x3f));
    o[3] = (char)(0x80 | (c & 0x3f));
    return 4;
}

static int hex4(const char *p, unsigned *out)
{
    unsigned v = 0;
    for (int i = 0; i < 4; i++) {
        char c = p[i];
        v <<= 4;
        if (c >= '0' && c <= '9')
            v |= (unsigned)(c - '0');
        else if (c >= 'a' && c <= 'f')
            v |= (unsigned)(c - 'a' + 10);
        else if (c >= 'A' && c <= 'F')
            v |= (unsigned)(c - 'A' + 10);
        else
            return -1;
    }
    *out = v;
    return 0;
}

/* A JSON string at j->p (after whitespace). With out, *out receives the
 * decoded text (malloc'd); without, the string is only checked. */
static int jp_string(jp *j, char **out)
{
    jp_ws(j);
    if (j->p >= j->end || *j->p != '"')
        return jp_syntax(j, "expected a string");
    const char *s = ++j->p;
    const char *q = s;
    int plain = 1;
    for (; q < j->end && *q != '"'; q++) {
        if ((unsigned char)*q < 0x20)
            return jp_syntax(j, "control character in a string");
        if (*q == '\\') {
            plain = 0;
            q++;
            if (q >= j->end)
                break;
        }
    }
    if (q >= j->end)
        return jp_syntax(j, "unterminated string");
    if (out) {
        char *o = malloc((size_t)(q - s) + 1);
        if (!o)
            return jp_syntax(j, "out of memory");
        size_t k = 0;
        if (plain) {
            memcpy(o, s, (size_t)(q - s));
            k = (size_t)(q - s);
        } else {
            for (const char *r = s; r < q; r++) {
                if (*r != '\\') {
                    o[k++] = *r;
                    continue;
                }
                r++;
                switch (*r) {
                case '"': o[k++] = '"'; break;
                case '\\': o[k++] = '\\'; break;
                case '/': o[k++] = '/'; break;
                case 'b': o[k++] = '\b'; break;
                case 'f': o[k++] = '\f'; break;
                case 'n': o[k++] = '\n'; break;
                case 'r': o[k++] = '\r'; break;
                case 't': o[k++] = '\t'; break;
                case 'u': {
                    unsigned c, c2;
                    if (q - r < 5 || hex4(r + 1, &c) < 0) {
                        free(o);
                        j->p = r;
                        return jp_syntax(j, "bad \\u escape");
                    }
                    r += 4;
                    if (c >= 0xd800 && c < 0xdc00 && q - r >= 7 && r[1] == '\\' && r[2] == 'u' &&
                        hex4(r + 3, &c2) == 0 && c2 >= 0xdc00 && c2 < 0xe000) {
                        c = 0x10000 + ((c - 0xd800) << 10) + (c2 - 0xdc00);
                        r += 6;
                    }
                    /* 6 escape bytes always hold the at most 4 bytes written */
                    k += utf8_put(o + k, c);
                    break;
                }
                default:
                    free(o);
                    j->p = r;
                    return jp_syntax(j, "bad escape in a string");
                }
            }
        }
        o[k] = '\0';
        *out = o;
    } else {
        for (const char *r = s; r < q; r++)
            if (*r == '\\') {
                r++;
                if (!strchr("\"\\/bfnrtu", *r)) {
                    j->p = r;
                    return jp_syntax(j, "bad escape in a string");
                }
                if (*r == 'u') {
                    unsigned c;
                    if (q - r < 5 || hex4(r + 1, &c) < 0) {
                        j->p = r;
                        return jp_syntax(j, "bad \\u escape");
                    }
                    r += 4;
                }
            }
    }
    j->p = q + 1;
    return 0;
}

/* Skips any JSON value (depth-limited). */
static int jp_skip(jp *j, int depth)
{
    jp_ws(j);
    if (j->p >= j->end)
        return jp_syntax(j, "expected a value");
    if (depth > 64)
        return jp_syntax(j, "nested too deeply");
    char c = *j->p;
    if (c == '"')
        return jp_string(j, NULL);
    if (c == '{' || c == '[') {
        char close = c == '{' ? '}' : ']';
        j->p++;
        if (jp_lit(j, close))
            return 0;
        do {
            if (c == '{') {
                if (jp_string(j, NULL) < 0)
                    return -1;
                if (!jp_lit(j, ':'))
                    return jp_syntax(j, "expected ':'");
            }
            if (jp_skip(j, depth + 1) < 0)
                return -1;
        } while (jp_lit(j, ','));
        if (!jp_lit(j, close))
            return jp_syntax(j, c == '{' ? "expected ',' or '}'" : "expected ',' or ']'");
        return 0;
    }
    static const char *const words[] = {"true", "false", "null"};
    for (int i = 0; i < 3; i++) {
        size_t l = strlen(words[i]);
        if ((size_t)(j->end - j->p) >= l && memcmp(j->p, words[i], l) == 0) {
            j->p += l;
            return 0;
        }
    }
    double v;
    return jp_number(j, &v);
}

/* 1 if the next value is the literal null (consumed). */
static int jp_null(jp *j)
{
    jp_ws(j);
    if (j->end - j->p >= 4 && memcmp(j->p, "null", 4) == 0) {
        j->p += 4;
        return 1;
    }
    return 0;
}

/* A growable array of doubles. */
typedef struct dvec {
    double *v;
    int n, cap;
    int nested; /* 1 if written as triples */
} dvec;

static int dvec_push(dvec *d, double x)
{
    if (d->n == d->cap) {
        int cap = d->cap ? 2 * d->cap : 48;
        double *nv = realloc(d->v, (size_t)cap * sizeof *nv);
        if (!nv)
            return -1;
        d->v = nv;
        d->cap = cap;
    }
    d->v[d->n++] = x;
    return 0;
}

/* An array of numbers, flat or as triples, into d. Non-finite values (from
 * overflowing literals such as 1e999) are kept and refused later. A value
 * that is not a number gets a reason naming the position. */
static int jp_vec(jp *j, dvec *d, const char *what)
{
    if (!jp_lit(j, '['))
        return fail_why(j->why, j->nwhy, "\"%s\" is not an array", what);
    if (jp_lit(j, ']'))
        return 0;
    jp_ws(j);
    d->nested = j->p < j->end && *j->p == '[';
    do {
        if (d->nested) {
            int before = d->n;
            if (!jp_lit(j, '['))
                return fail_why(j->why, j->nwhy, "\"%s\" mixes triples and numbers", what);
            do {
                double v;
                jp_ws(j);
                if (j->p < j->end && (*j->p == '-' || (*j->p >= '0' && *j->p <= '9'))) {
                    if (jp_number(j, &v) < 0)
                        return -1;
                } else {
                    if (j->p < j->end && (*j->p == 'N' || *j->p == 'I'))
                        return jp_number(j, &v);
                    return fail_why(j->why, j->nwhy, "\"%s\" atom %d: not a number", what,
                                    before / 3 + 1);
                }
                if (dvec_push(d, v) < 0)
                    return fail_why(j->why, j->nwhy, "out of memory");
            } while (jp_lit(j, ','));
            if (!jp_lit(j, ']'))
                return jp_syntax(j, "expected ',' or ']'");
            if (d->n - before != 3)
                return fail_why(j->why, j->nwhy, "\"%s\" entry %d is not three numbers", what,
                                before / 3 + 1);
        } else {
            double v;
            jp_ws(j);
            if (j->p < j->end && (*j->p == '-' || (*j->p >= '0' && *j->p <= '9'))) {
                if (jp_number(j, &v) < 0)
                    return -1;
            } else {
                if (j->p < j->end && (*j->p == 'N' || *j->p == 'I'))
                    return jp_number(j, &v);
                return fail_why(j->why, j->nwhy, "\"%s\" value %d (atom %d): not a number", what,
                                d->n + 1, d->n / 3 + 1);
            }
            if (dvec_push(d, v) < 0)
                return fail_why(j->why, j->nwhy, "out of memory");
        }
    } while (jp_lit(j, ','));
    if (!jp_lit(j, ']'))
        return jp_syntax(j, "expected ',' or ']'");
    return 0;
}

/* An integer member value. */
static int jp_int(jp *j, const char *name, int *out)
{
    double v;
    jp_ws(j);
    if (j->p >= j->end || !(*j->p == '-' || (*j->p >= '0' && *j->p <= '9')))
        return fail_why(j->why, j->nwhy, "\"%s\" is not an integer", name);
    if (jp_number(j, &v) < 0)
        return -1;
    if (v != floor(v) || fabs(v) > 1e6)
        return fail_why(j->why, j->nwhy, "\"%s\" is not an integer", name);
    *out = (int)v;
    return 0;
}

/* Checks that the 3 * natoms values of d are finite; the reason names the
 * atom. */
static int finite_vec(const dvec *d, const char *what, char *why, size_t nwhy)
{
    for (int i = 0; i < d->n; i++)
        if (!isfinite(d->v[i])) {
            snprintf(why, nwhy, "\"%s\" value %d (atom %d): not a finite number", what, i + 1,
                     i / 3 + 1);
            return -1;
        }
    return 0;
}

/* 1 if the line holds only whitespace. */
static int blank(const char *s, size_t n)
{
    for (size_t i = 0; i < n; i++)
        if (s[i] != ' ' && s[i] != '\t' && s[i] != '\r')
            return 0;
    return 1;
}

/* Parses one structure line (not the header) with default unit factors fe,
 * fl into p. Sets p->kind. */
static void parse_line(const char *s, size_t n, double fe, double fl, parsed *p)
{
    memset(p, 0, sizeof *p);
    if (blank(s, n)) {
        p->kind = 1;
        return;
    }
    p->kind = 2;
    p->mult = 1;
    const size_t nw = sizeof p->why;
    jp j = {s, s + n, p->why, nw, s};
    dvec xyz = {0}, frc = {0};
    char **els = NULL;
    int nel = 0, cap = 0;
    int have_energy = 0, have_id = 0, have_forces = 0, have_xyz = 0, have_els = 0;
    char *eunit = NULL, *lunit = NULL;
    if (!jp_lit(&j, '{')) {
        snprintf(p->why, nw, "not a JSON object");
        jp_ws(&j);
        if (j.p < j.end && *j.p != '[' && *j.p != '"' && !(*j.p == '-' || (*j.p >= '0' && *j.p <= '9')))
            jp_syntax(&j, "expected '{'");
        goto done;
    }
    if (!jp_lit(&j, '}')) {
        do {
            char *name = NULL;
            if (jp_string(&j, &name) < 0)
                goto done;
            if (!jp_lit(&j, ':')) {
                free(name);
                jp_syntax(&j, "expected ':'");
                goto done;
            }
            int r = 0;
            if (!strcmp(name, "key")) {
                free(p->key);
                p->key = NULL;
                jp_ws(&j);
                if (j.p < j.end && *j.p == '"')
                    r = jp_string(&j, &p->key);
                else
                    r = fail_why(p->why, nw, "\"key\" is not a non-empty string");
            } else if (!strcmp(name, "elements")) {
                have_els = 1;
                if (!jp_lit(&j, '['))
                    r = fail_why(p->why, nw, "\"elements\" is not a non-empty array");
                else if (!jp_lit(&j, ']')) {
                    do {
                        char *sym = NULL;
                        jp_ws(&j);
                        if (j.p >= j.end || *j.p != '"') {
                            r = fail_why(p->why, nw, "atom %d: unknown element (not a string)",
                                         nel + 1);
                            break;
                        }
                        if ((r = jp_string(&j, &sym)) < 0)
                            break;
                        if (nel == cap) {
                            cap = cap ? 2 * cap : 32;
                            char **ne = realloc(els, (size_t)cap * sizeof *ne);
                            if (!ne) {
                                free(sym);
                                r = fail_why(p->why, nw, "out of memory");
                                break;
                            }
                            els = ne;
                        }
                        els[nel++] = sym;
                    } while (jp_lit(&j, ','));
                    if (r == 0 && !jp_lit(&j, ']'))
                        r = jp_syntax(&j, "expected ',' or ']'");
                }
            } else if (!strcmp(name, "coordinates")) {
                have_xyz = 1;
                xyz.n = 0;
                r = jp_vec(&j, &xyz, "coordinates");
            } else if (!strcmp(name, "forces")) {
                frc.n = 0;
                have_forces = !jp_null(&j);
                if (have_forces)
                    r = jp_vec(&j, &frc, "forces");
            } else if (!strcmp(name, "energy")) {
                jp_ws(&j);
                if (j.p < j.end && (*j.p == '-' || (*j.p >= '0' && *j.p <= '9'))) {
                    r = jp_number(&j, &p->energy);
                    have_energy = 1;
                } else if (j.p < j.end && (*j.p == 'N' || *j.p == 'I')) {
                    double v;
                    r = jp_number(&j, &v);
                } else {
                    r = fail_why(p->why, nw, "\"energy\" is not a finite number");
                }
            } else if (!strcmp(name, "charge")) {
                r = jp_int(&j, "charge", &p->charge);
            } else if (!strcmp(name, "multiplicity")) {
                r = jp_int(&j, "multiplicity", &p->mult);
            } else if (!strcmp(name, "id")) {
                char *t = NULL;
                if (jp_null(&j))
                    r = 0;
                else if ((r = jp_string(&j, &t)) == 0) {
                    if (parse_id(t, &p->id) < 0)
                        r = fail_why(p->why, nw, "\"id\" is not 16 hexadecimal digits");
                    else
                        have_id = 1;
                }
                free(t);
            } else if (!strcmp(name, "source") || !strcmp(name, "tag") ||
                       !strcmp(name, "energy_unit") || !strcmp(name, "length_unit")) {
                char **dst = !strcmp(name, "source") ? &p->source
                             : !strcmp(name, "tag")  ? &p->tag
                             : name[0] == 'e'        ? &eunit
                                                     : &lunit;
                free(*dst);
                *dst = NULL;
                jp_ws(&j);
                if (jp_null(&j))
                    r = 0;
                else if (j.p < j.end && *j.p == '"')
                    r = jp_string(&j, dst);
                else
                    r = fail_why(p->why, nw, "\"%s\" is not a string", name);
            } else if (!strcmp(name, "dataset")) {
                r = fail_why(p->why, nw, "a header object is allowed only on the first line");
            } else {
                r = jp_skip(&j, 0);
            }
            free(name);
            if (r < 0)
                goto done;
        } while (jp_lit(&j, ','));
        if (!jp_lit(&j, '}')) {
            jp_syntax(&j, "expected ',' or '}'");
            goto done;
        }
    }
    jp_ws(&j);
    if (j.p != j.end) {
        jp_syntax(&j, "text after the object");
        goto done;
    }
    /* Meaning. */
    if (eunit && (fe = energy_factor(eunit)) == 0.0) {
        snprintf(p->why, nw, "unknown energy_unit (expected kcal/mol, kJ/mol, hartree or eV)");
        goto done;
    }
    if (lunit && (fl = length_factor(lunit)) == 0.0) {
        snprintf(p->why, nw, "unknown length_unit (expected angstrom or bohr)");
        goto done;
    }
    if (!p->key) {
        snprintf(p->why, nw, "missing \"key\" (the molecule key)");
        goto done;
    }
    if (!p->key[0]) {
        snprintf(p->why, nw, "\"key\" is not a non-empty string");
        goto done;
    }
    if (!have_els) {
        snprintf(p->why, nw, "missing \"elements\"");
        goto done;
    }
    if (nel == 0) {
        snprintf(p->why, nw, "\"elements\" is not a non-empty array");
        goto done;
    }
    p->natoms = nel;
    p->z = malloc((size_t)nel * sizeof *p->z);
    if (!p->z) {
        snprintf(p->why, nw, "out of memory");
        goto done;
    }
    for (int i = 0; i < nel; i++) {
        int zz = nd_element_from_symbol(els[i], -1);
        if (zz <= 0) {
            snprintf(p->why, nw, "atom %d: unknown element '%.8s'", i + 1, els[i]);
            goto done;
        }
        p->z[i] = zz;
    }
    if (!have_xyz) {
        snprintf(p->why, nw, "missing \"coordinates\"");
        goto done;
    }
    if (xyz.n != 3 * nel) {
        if (xyz.nested)
            snprintf(p->why, nw, "\"coordinates\" has %d triples for %d elements", xyz.n / 3, nel);
        else
            snprintf(p->why, nw, "\"coordinates\" has %d numbers for %d elements (expected %d)",
                     xyz.n, nel, 3 * nel);
        goto done;
    }
    if (finite_vec(&xyz, "coordinates", p->why, nw) < 0)
        goto done;
    if (!have_energy) {
        snprintf(p->why, nw, "missing \"energy\"");
        goto done;
    }
    if (!isfinite(p->energy)) {
        snprintf(p->why, nw, "\"energy\" is not a finite number");
        goto done;
    }
    p->energy *= fe;
    if (have_forces) {
        if (frc.n != 3 * nel) {
            if (frc.nested)
                snprintf(p->why, nw, "\"forces\" has %d triples for %d elements", frc.n / 3, nel);
            else
                snprintf(p->why, nw, "\"forces\" has %d numbers for %d elements (expected %d)",
                         frc.n, nel, 3 * nel);
            goto done;
        }
        if (finite_vec(&frc, "forces", p->why, nw) < 0)
            goto done;
        double f = fe / fl;
        for (int i = 0; i < frc.n; i++)
            frc.v[i] *= f;
        p->forces = frc.v;
        frc.v = NULL;
    }
    if (fl != 1.0)
        for (int i = 0; i < xyz.n; i++)
            xyz.v[i] *= fl;
    p->xyz = xyz.v;
    xyz.v = NULL;
    if (p->mult < 1) {
        snprintf(p->why, nw, "\"multiplicity\" must be at least 1");
        goto done;
    }
    if (!have_id)
        p->id = nd_dataset_hash(nel, p->z, p->xyz, p->charge, p->mult);
    p->kind = 0;
done:
    for (int i = 0; i < nel; i++)
        free(els[i]);
    free(els);
    free(xyz.v);
    free(frc.v);
    free(eunit);
    free(lunit);
    if (p->kind == 2)
        parsed_free(p);
}

/* Parses a header line; returns 1 if it is one (units in *fe, *fl), 0 if it
 * is not a header, -1 if it is a bad header (reason in why). */
static int parse_header(const char *s, size_t n, double *fe, double *fl, char *why, size_t nwhy)
{
    if (blank(s, n))
        return 0;
    cJSON *o = cJSON_ParseWithLength(s, n);
    if (!o)
        return 0; /* reported by the structure parser */
    int r = 0;
    if (cJSON_IsObject(o) && cJSON_GetObjectItemCaseSensitive(o, "dataset") &&
        !cJSON_GetObjectItemCaseSensitive(o, "elements")) {
        const cJSON *v = cJSON_GetObjectItemCaseSensitive(o, "version");
        if (v && !(cJSON_IsNumber(v) && v->valuedouble == 1.0)) {
            snprintf(why, nwhy, "dataset version %.20s is not understood (this reader knows version 1)",
                     cJSON_IsNumber(v) ? "other than 1" : "not a number");
            r = -1;
        } else {
            r = read_units(o, fe, fl, why, nwhy) < 0 ? -1 : 1;
        }
    }
    cJSON_Delete(o);
    return r;
}

/* ------------------------------------------------------------------ cache */

#define CACHE_MAGIC "nadir-dataset-cache-2\n"

typedef struct cache_head {
    char magic[24];
    uint64_t size, mtime_s, mtime_ns, hash;
    int64_t n, total, lines, nkeys, nlabels, keybytes, labelbytes;
} cache_head;

/* Writes nw items of size sz; 0 on success. */
static int put(FILE *f, const void *p, size_t sz, size_t nw)
{
    return nw == 0 || fwrite(p, sz, nw, f) == nw ? 0 : -1;
}

static int get(FILE *f, void *p, size_t sz, size_t nr)
{
    return nr == 0 || fread(p, sz, nr, f) == nr ? 0 : -1;
}

/* Total bytes of a string table's strings with their NULs. */
static size_t strtab_bytes(const strtab *t)
{
    size_t b = 0;
    for (int i = 0; i < t->n; i++)
        b += strlen(t->s[i]) + 1;
    return b;
}

/* Writes the cache for d next to path (PATH.cache, via a temporary and a
 * rename). Returns 0 on success; failures leave no cache and are not errors
 * for the caller (a read-only directory simply has none). */
static int cache_write(const char *path, const struct stat *st, uint64_t hash, long lines,
                       const nd_dataset *d)
{
    size_t pl = strlen(path);
    char *cpath = malloc(pl + 16), *tmp = malloc(pl + 32);
    if (!cpath || !tmp) {
        free(cpath);
        free(tmp);
        return -1;
    }
    snprintf(cpath, pl + 16, "%s.cache", path);
    snprintf(tmp, pl + 32, "%s.cache.%ld.tmp", path, (long)getpid());
    FILE *f = fopen(tmp, "wbe");
    int bad = !f;
    if (f) {
        cache_head h;
        memset(&h, 0, sizeof h);
        memcpy(h.magic, CACHE_MAGIC, strlen(CACHE_MAGIC));
        h.size = (uint64_t)st->st_size;
        h.mtime_s = (uint64_t)st->st_mtim.tv_sec;
        h.mtime_ns = (uint64_t)st->st_mtim.tv_nsec;
        h.hash = hash;
        h.n = d->n;
        h.total = d->total;
        h.lines = lines;
        h.nkeys = d->keys.n;
        h.nlabels = d->labels.n;
        h.keybytes = (int64_t)strtab_bytes(&d->keys);
        h.labelbytes = (int64_t)strtab_bytes(&d->labels);
        size_t n = (size_t)d->n, t = (size_t)d->total;
        bad |= put(f, &h, sizeof h, 1) | put(f, d->start, sizeof *d->start, n + 1) |
               put(f, d->z, sizeof *d->z, t) | put(f, d->xyz, sizeof *d->xyz, 3 * t) |
               put(f, d->forces, sizeof *d->forces, 3 * t) | put(f, d->has_forces, 1, n) |
               put(f, d->energy, sizeof *d->energy, n) | put(f, d->charge, sizeof *d->charge, n) |
               put(f, d->mult, sizeof *d->mult, n) | put(f, d->key, sizeof *d->key, n) |
               put(f, d->source, sizeof *d->source, n) | put(f, d->tag, sizeof *d->tag, n) |
               put(f, d->id, sizeof *d->id, n);
        for (int i = 0; i < d->keys.n; i++)
            bad |= put(f, d->keys.s[i], 1, strlen(d->keys.s[i]) + 1);
        for (int i = 0; i < d->labels.n; i++)
            bad |= put(f, d->labels.s[i], 1, strlen(d->labels.s[i]) + 1);
        bad |= fclose(f) != 0;
    }
    if (!bad)
        bad = rename(tmp, cpath) != 0;
    if (bad)
        unlink(tmp);
    free(cpath);
    free(tmp);
    return bad ? -1 : 0;
}

/* Reads nstr NUL-terminated strings (bytes in total) into t. */
static int cache_strings(FILE *f, strtab *t, int64_t nstr, int64_t bytes)
{
    if (nstr < 0 || bytes < nstr || bytes > (int64_t)1 << 40)
        return -1;
    char *blob = malloc((size_t)bytes + 1);
    if (!blob || get(f, blob, 1, (size_t)bytes) < 0) {
        free(blob);
        return -1;
    }
    blob[bytes] = '\0';
    int r = 0;
    size_t off = 0;
    for (int64_t i = 0; i < nstr && r == 0; i++) {
        if (off >= (size_t)bytes) {
            r = -1;
            break;
        }
        if (strtab_intern(t, blob + off) != (int)i)
            r = -1; /* strings of a table are distinct, so indexes must match */
        off += strlen(blob + off) + 1;
    }
    free(blob);
    return r;
}

/* Loads the cache for path if it matches st and the content hash. Returns
 * the dataset, or NULL when there is no valid cache. */
static nd_dataset *cache_read(const char *path, const struct stat *st, uint64_t hash, long *lines)
{
    size_t pl = strlen(path);
    char *cpath = malloc(pl + 16);
    if (!cpath)
        return NULL;
    snprintf(cpath, pl + 16, "%s.cache", path);
    FILE *f = fopen(cpath, "rbe");
    free(cpath);
    if (!f)
        return NULL;
    cache_head h;
    nd_dataset *d = NULL;
    if (get(f, &h, sizeof h, 1) < 0 || memcmp(h.magic, CACHE_MAGIC, strlen(CACHE_MAGIC)) != 0 ||
        h.size != (uint64_t)st->st_size || h.mtime_s != (uint64_t)st->st_mtim.tv_sec ||
        h.mtime_ns != (uint64_t)st->st_mtim.tv_nsec || h.hash != hash || h.n < 0 || h.total < 0 ||
        h.n > (int64_t)1 << 32 || h.total > (int64_t)1 << 36)
        goto fail;
    d = calloc(1, sizeof *d);
    if (!d || dataset_alloc(d, (long)h.n, (long)h.total) < 0)
        goto fail;
    size_t n = (size_t)h.n, t = (size_t)h.total;
    if (get(f, d->start, sizeof *d->start, n + 1) | get(f, d->z, sizeof *d->z, t) |
        get(f, d->xyz, sizeof *d->xyz, 3 * t) | get(f, d->forces, sizeof *d->forces, 3 * t) |
        get(f, d->has_forces, 1, n) | get(f, d->energy, sizeof *d->energy, n) |
        get(f, d->charge, sizeof *d->charge, n) | get(f, d->mult, sizeof *d->mult, n) |
        get(f, d->key, sizeof *d->key, n) | get(f, d->source, sizeof *d->source, n) |
        get(f, d->tag, sizeof *d->tag, n) | get(f, d->id, sizeof *d->id, n))
        goto fail;
    if (cache_strings(f, &d->keys, h.nkeys, h.keybytes) < 0 ||
        cache_strings(f, &d->labels, h.nlabels, h.labelbytes) < 0)
        goto fail;
    /* Validate indexes so a damaged cache cannot send a reader out of bounds. */
    if (d->start[0] != 0 || d->start[n] != (long)t)
        goto fail;
    for (size_t i = 0; i < n; i++)
        if (d->start[i + 1] <= d->start[i] || d->key[i] < 0 || d->key[i] >= d->keys.n ||
            d->source[i] < -1 || d->source[i] >= d->labels.n || d->tag[i] < -1 ||
            d->tag[i] >= d->labels.n)
            goto fail;
    fclose(f);
    memcpy(d->sorted_id, d->id, n * sizeof *d->id);
    qsort(d->sorted_id, n, sizeof *d->sorted_id, cmp_u64);
    *lines = (long)h.lines;
    return d;
fail:
    fclose(f);
    nd_dataset_free(d);
    return NULL;
}

/* ------------------------------------------------------------------- load */

int nd_dataset_load(nd_dataset **out, const char *path, int flags, nd_dataset_report *rep,
                    nd_error *err)
{
    nd_dataset_report local;
    if (!rep)
        rep = &local;
    memset(rep, 0, sizeof *rep);
    if (!out || !path)
        return nd_fail(err, ND_EINVAL, "nd_dataset_load: NULL argument");
    *out = NULL;
    int fd = open(path, O_RDONLY | O_CLOEXEC);
    if (fd < 0)
        return nd_fail(err, ND_EIO, "%s: cannot open: %s", path, strerror(errno));
    struct stat st;
    if (fstat(fd, &st) < 0 || !S_ISREG(st.st_mode)) {
        close(fd);
        return nd_fail(err, ND_EIO, "%s: not a regular file", path);
    }
    size_t size = (size_t)st.st_size;
    const char *buf = "";
    void *map = NULL;
    if (size > 0) {
        map = mmap(NULL, size, PROT_READ, MAP_PRIVATE, fd, 0);
        if (map == MAP_FAILED) {
            close(fd);
            return nd_fail(err, ND_EIO, "%s: cannot map: %s", path, strerror(errno));
        }
        buf = map;
    }
    close(fd);

    int status = ND_OK;
    long *line_start = NULL;
    parsed *pl = NULL;
    nd_dataset *d = NULL;
    long nlines = 0;
    uint64_t hash = 0;
    if (flags & ND_DATASET_CACHE) {
        hash = hash_bytes((const unsigned char *)buf, size);
        long lines = 0;
        d = cache_read(path, &st, hash, &lines);
        if (d) {
            rep->lines = lines;
            rep->structures = d->n;
            rep->cache_used = 1;
            goto done;
        }
    }

    /* Index the lines. A last line without '\n' is an interrupted write. */
    long cap = 1024;
    line_start = malloc((size_t)(cap + 1) * sizeof *line_start);
    if (!line_start) {
        status = nd_fail(err, ND_ENOMEM, "%s: out of memory", path);
        goto done;
    }
    size_t pos = 0;
    while (pos < size) {
        const char *nl = memchr(buf + pos, '\n', size - pos);
        if (!nl) {
            rep->truncated_tail = 1;
            break;
        }
        if (nlines == cap) {
            cap *= 2;
            long *nls = realloc(line_start, (size_t)(cap + 1) * sizeof *nls);
            if (!nls) {
                status = nd_fail(err, ND_ENOMEM, "%s: out of memory", path);
                goto done;
            }
            line_start = nls;
        }
        line_start[nlines++] = (long)pos;
        pos = (size_t)(nl - buf) + 1;
    }
    line_start[nlines] = (long)pos;
    rep->lines = nlines;

    /* Header. */
    double fe = 1.0, fl = 1.0;
    long first = 0;
    if (nlines > 0) {
        char why[200];
        size_t len = (size_t)(line_start[1] - line_start[0] - 1);
        int h = parse_header(buf, len, &fe, &fl, why, sizeof why);
        if (h < 0) {
            status = nd_fail(err, ND_EINPUT, "%s, line 1: %s", path, why);
            goto done;
        }
        first = h;
    }

    /* Parse in parallel; results land by line index, so the outcome does not
     * depend on the thread count. */
    pl = calloc((size_t)nlines + 1, sizeof *pl);
    if (!pl) {
        status = nd_fail(err, ND_ENOMEM, "%s: out of memory", path);
        goto done;
    }
    if (first)
        pl[0].kind = 1;
#pragma omp parallel for schedule(dynamic, 256)
    for (long i = first; i < nlines; i++)
        parse_line(buf + line_start[i], (size_t)(line_start[i + 1] - line_start[i] - 1), fe, fl,
                   &pl[i]);

    long n = 0, total = 0;
    for (long i = 0; i < nlines; i++) {
        if (pl[i].kind == 0) {
            n++;
            total += pl[i].natoms;
        } else if (pl[i].kind == 2) {
            if (!rep->first_bad_line) {
                rep->first_bad_line = i + 1;
                snprintf(rep->first_bad, sizeof rep->first_bad, "%s, line %ld: %s", path, i + 1,
                         pl[i].why);
            }
            rep->bad_lines++;
        }
    }
    if (rep->bad_lines && !(flags & ND_DATASET_SKIP_BAD)) {
        status = nd_fail(err, ND_EINPUT, "%s", rep->first_bad);
        goto done;
    }
    d = calloc(1, sizeof *d);
    if (!d || dataset_alloc(d, n, total) < 0) {
        status = nd_fail(err, ND_ENOMEM, "%s: out of memory for %ld structures", path, n);
        goto done;
    }
    long k = 0, a = 0;
    for (long i = 0; i < nlines; i++) {
        parsed *p = &pl[i];
        if (p->kind != 0)
            continue;
        d->start[k] = a;
        memcpy(d->z + a, p->z, (size_t)p->natoms * sizeof *d->z);
        memcpy(d->xyz + 3 * a, p->xyz, 3 * (size_t)p->natoms * sizeof *d->xyz);
        if (p->forces)
            memcpy(d->forces + 3 * a, p->forces, 3 * (size_t)p->natoms * sizeof *d->forces);
        else
            memset(d->forces + 3 * a, 0, 3 * (size_t)p->natoms * sizeof *d->forces);
        d->has_forces[k] = p->forces != NULL;
        d->energy[k] = p->energy;
        d->charge[k] = p->charge;
        d->mult[k] = p->mult;
        d->id[k] = p->id;
        d->key[k] = strtab_intern(&d->keys, p->key);
        d->source[k] = p->source ? strtab_intern(&d->labels, p->source) : -1;
        d->tag[k] = p->tag ? strtab_intern(&d->labels, p->tag) : -1;
        if (d->key[k] < 0 || (p->source && d->source[k] < 0) || (p->tag && d->tag[k] < 0)) {
            status = nd_fail(err, ND_ENOMEM, "%s: out of memory", path);
            goto done;
        }
        a += p->natoms;
        k++;
        parsed_free(p);
    }
    d->start[n] = a;
    memcpy(d->sorted_id, d->id, (size_t)n * sizeof *d->id);
    qsort(d->sorted_id, (size_t)n, sizeof *d->sorted_id, cmp_u64);
    rep->structures = n;
    /* A cache of a file with bad lines or an interrupted tail would hide them. */
    if ((flags & ND_DATASET_CACHE) && rep->bad_lines == 0 && !rep->truncated_tail)
        rep->cache_written = cache_write(path, &st, hash, nlines, d) == 0;
done:
    if (pl) {
        for (long i = 0; i < nlines; i++)
            parsed_free(&pl[i]);
        free(pl);
    }
    free(line_start);
    if (map)
        munmap(map, size);
    if (status != ND_OK) {
        nd_dataset_free(d);
        return status;
    }
    *out = d;
    return ND_OK;
}

/* ----------------------------------------------------------------- writer */

struct nd_dataset_writer {
    FILE *f;
    char *path;
};

/* Growable text buffer for formatting a line. */
typedef struct sbuf {
    char *s;
    size_t n, cap;
    int oom;
} sbuf;

static void sb_put(sbuf *b, const char *s, size_t n)
{
    if (b->oom)
        return;
    if (b->n + n + 1 > b->cap) {
        size_t cap = b->cap ? b->cap : 256;
        while (cap < b->n + n + 1)
            cap *= 2;
        char *ns = realloc(b->s, cap);
        if (!ns) {
            b->oom = 1;
            return;
        }
        b->s = ns;
        b->cap = cap;
    }
    memcpy(b->s + b->n, s, n);
    b->n += n;
    b->s[b->n] = '\0';
}

static void sb_str(sbuf *b, const char *s) { sb_put(b, s, strlen(s)); }

/* Appends the shortest of %.15g, %.16g, %.17g that reads back as exactly v,
 * so a write and a read give the same bits. */
static void sb_num(sbuf *b, double v)
{
    char t[40];
    sb_str(b, nd_report_exact(v, t));
}

/* Appends s as a JSON string (quotes and escapes). */
static void sb_json_str(sbuf *b, const char *s)
{
    char *q = cJSON_PrintUnformatted(&(cJSON){.type = cJSON_String, .valuestring = (char *)s});
    if (!q) {
        b->oom = 1;
        return;
    }
    sb_str(b, q);
    cJSON_free(q);
}

char *nd_dataset_format_line(const nd_dataset_entry *e, nd_error *err)
{
    if (!e || e->natoms <= 0 || !e->z || !e->xyz || !e->key || !e->key[0]) {
        nd_fail(err, ND_EINVAL, "dataset line: needs atoms, coordinates and a non-empty key");
        return NULL;
    }
    if (!isfinite(e->energy)) {
        nd_fail(err, ND_EINPUT, "dataset line: energy is not finite");
        return NULL;
    }
    for (int i = 0; i < 3 * e->natoms; i++)
        if (!isfinite(e->xyz[i]) || (e->forces && !isfinite(e->forces[i]))) {
            nd_fail(err, ND_EINPUT, "dataset line: atom %d has a non-finite %s", i / 3 + 1,
                    isfinite(e->xyz[i]) ? "force" : "coordinate");
            return NULL;
        }
    sbuf b = {0};
    char t[64];
    sb_str(&b, "{\"key\": ");
    sb_json_str(&b, e->key);
    sb_str(&b, ", \"elements\": [");
    for (int i = 0; i < e->natoms; i++) {
        const char *sym = nd_element_symbol(e->z[i]);
        if (sym[0] == '?') {
            free(b.s);
            nd_fail(err, ND_EINPUT, "dataset line: atom %d has atomic number %d", i + 1, e->z[i]);
            return NULL;
        }
        snprintf(t, sizeof t, "%s\"%s\"", i ? ", " : "", sym);
        sb_str(&b, t);
    }
    sb_str(&b, "], \"coordinates\": [");
    for (int i = 0; i < 3 * e->natoms; i++) {
        if (i)
            sb_str(&b, ", ");
        sb_num(&b, e->xyz[i]);
    }
    sb_str(&b, "], \"energy\": ");
    sb_num(&b, e->energy);
    if (e->forces) {
        sb_str(&b, ", \"forces\": [");
        for (int i = 0; i < 3 * e->natoms; i++) {
            if (i)
                sb_str(&b, ", ");
            sb_num(&b, e->forces[i]);
        }
        sb_str(&b, "]");
    }
    char id[17];
    nd_dataset_format_id(e->id, id);
    snprintf(t, sizeof t, ", \"charge\": %d, \"multiplicity\": %d, \"id\": \"%s\"", e->charge,
             e->multiplicity, id);
    sb_str(&b, t);
    if (e->source) {
        sb_str(&b, ", \"source\": ");
        sb_json_str(&b, e->source);
    }
    if (e->tag) {
        sb_str(&b, ", \"tag\": ");
        sb_json_str(&b, e->tag);
    }
    sb_str(&b, "}\n");
    if (b.oom) {
        free(b.s);
        nd_fail(err, ND_ENOMEM, "dataset line: out of memory");
        return NULL;
    }
    return b.s;
}

int nd_dataset_writer_open(nd_dataset_writer **out, const char *path, long *dropped, nd_error *err)
{
    if (dropped)
        *dropped = 0;
    if (!out || !path)
        return nd_fail(err, ND_EINVAL, "nd_dataset_writer_open: NULL argument");
    *out = NULL;
    int fd = open(path, O_RDWR | O_CREAT | O_CLOEXEC, 0644);
    if (fd < 0)
        return nd_fail(err, ND_EIO, "%s: cannot open for appending: %s", path, strerror(errno));
    struct stat st;
    if (fstat(fd, &st) < 0 || !S_ISREG(st.st_mode)) {
        close(fd);
        return nd_fail(err, ND_EIO, "%s: not a regular file", path);
    }
    off_t size = st.st_size;
    /* Append only to what looks like a dataset (JSON lines): the cut of a
     * partial last line below must never touch another kind of file. */
    if (size > 0) {
        unsigned char first[512];
        ssize_t got = pread(fd, first, sizeof first, 0);
        ssize_t i = 0;
        while (i < got && (first[i] == ' ' || first[i] == '\t' || first[i] == '\r' || first[i] == '\n'))
            i++;
        int binary = memchr(first, 0, got > 0 ? (size_t)got : 0) != NULL;
        if (got <= 0 || binary || (i < got && first[i] != '{')) {
            close(fd);
            return nd_fail(err, ND_EINPUT,
                           "%s: not a dataset (its first line is not a JSON object); refusing to "
                           "append to it",
                           path);
        }
    }
    /* Find the end of the last whole line by reading backwards in blocks. */
    off_t keep = size;
    if (size > 0) {
        char blk[4096];
        off_t pos = size;
        keep = 0;
        while (pos > 0) {
            off_t from = pos > (off_t)sizeof blk ? pos - (off_t)sizeof blk : 0;
            ssize_t got = pread(fd, blk, (size_t)(pos - from), from);
            if (got != pos - from) {
                close(fd);
                return nd_fail(err, ND_EIO, "%s: cannot read: %s", path, strerror(errno));
            }
            ssize_t j = got - 1;
            while (j >= 0 && blk[j] != '\n')
                j--;
            if (j >= 0) {
                keep = from + j + 1;
                break;
            }
            pos = from;
        }
        if (keep < size) {
            if (ftruncate(fd, keep) < 0) {
                close(fd);
                return nd_fail(err, ND_EIO, "%s: cannot cut the partial last line: %s", path,
                               strerror(errno));
            }
            if (dropped)
                *dropped = (long)(size - keep);
        }
    }
    /* A header that declares other units would make our lines wrong. */
    if (keep > 0) {
        char head[1024];
        ssize_t got = pread(fd, head, sizeof head - 1, 0);
        if (got > 0) {
            head[got] = '\0';
            char *nl = strchr(head, '\n');
            if (nl) {
                double fe = 1.0, fl = 1.0;
                char why[200];
                int h = parse_header(head, (size_t)(nl - head), &fe, &fl, why, sizeof why);
                if (h < 0) {
                    close(fd);
                    return nd_fail(err, ND_EINPUT, "%s, line 1: %s; cannot append to it", path, why);
                }
                if (h == 1 && (fe != 1.0 || fl != 1.0)) {
                    close(fd);
                    return nd_fail(err, ND_EINPUT,
                                   "%s, line 1: the header declares units other than kcal/mol and "
                                   "angstrom; cannot append to it",
                                   path);
                }
            }
        }
    }
    if (lseek(fd, 0, SEEK_END) < 0) {
        close(fd);
        return nd_fail(err, ND_EIO, "%s: cannot seek: %s", path, strerror(errno));
    }
    FILE *f = fdopen(fd, "a");
    nd_dataset_writer *w = calloc(1, sizeof *w);
    char *p = strdup(path);
    if (!f || !w || !p) {
        if (f)
            fclose(f);
        else
            close(fd);
        free(w);
        free(p);
        return nd_fail(err, ND_ENOMEM, "%s: out of memory", path);
    }
    w->f = f;
    w->path = p;
    if (keep == 0) {
        fputs("{\"dataset\": \"nadir\", \"version\": 1, \"energy_unit\": \"kcal/mol\", "
              "\"length_unit\": \"angstrom\"}\n",
              f);
        if (fflush(f) != 0) {
            int e = errno;
            nd_dataset_writer_close(w, NULL);
            return nd_fail(err, ND_EIO, "%s: cannot write: %s", path, strerror(e));
        }
    }
    *out = w;
    return ND_OK;
}

int nd_dataset_writer_append(nd_dataset_writer *w, const nd_dataset_entry *e, nd_error *err)
{
    char *line = nd_dataset_format_line(e, err);
    if (!line)
        return err ? err->code : ND_EINPUT;
    size_t n = strlen(line);
    int bad = fwrite(line, 1, n, w->f) != n || fflush(w->f) != 0;
    free(line);
    if (bad)
        return nd_fail(err, ND_EIO, "%s: cannot write: %s", w->path, strerror(errno));
    return ND_OK;
}

int nd_dataset_writer_close(nd_dataset_writer *w, nd_error *err)
{
    if (!w)
        return ND_OK;
    int bad = fclose(w->f) != 0;
    int status = bad ? nd_fail(err, ND_EIO, "%s: cannot close: %s", w->path, strerror(errno)) : ND_OK;
    free(w->path);
    free(w);
    return status;
}
