#include "core/lineio.h"

#include <ctype.h>
#include <errno.h>
#include <limits.h>
#include <math.h>
#include <stdarg.h>
#include <stdlib.h>
#include <string.h>
#include <strings.h>

void nd_lines_init(nd_lines *l, const char *name, const char *unit, const void *mem, size_t size,
                   FILE *f)
{
    memset(l, 0, sizeof *l);
    l->name = name ? name : "input";
    l->unit = unit ? unit : "record";
    l->mem = mem;
    l->mem_size = mem ? size : 0;
    l->f = f;
}

void nd_lines_free(nd_lines *l)
{
    if (!l)
        return;
    free(l->buf);
    l->buf = NULL;
    l->cap = l->len = 0;
}

/* Next byte of the source, or EOF; sets *ioerr on a read error. */
static int next_byte(nd_lines *l, int *ioerr)
{
    if (l->mem_pos < l->mem_size)
        return l->mem[l->mem_pos++];
    if (!l->f)
        return EOF;
    int c = getc_unlocked(l->f);
    if (c == EOF && ferror(l->f))
        *ioerr = 1;
    return c;
}

/* Appends byte c to the line buffer, growing it. 0 or -1 on no memory. */
static int append(nd_lines *l, char c)
{
    if (l->len + 1 >= l->cap) {
        size_t cap = l->cap ? 2 * l->cap : 256;
        char *nb = realloc(l->buf, cap);
        if (!nb)
            return -1;
        l->buf = nb;
        l->cap = cap;
    }
    l->buf[l->len++] = c;
    return 0;
}

int nd_lines_next(nd_lines *l, nd_error *err)
{
    if (l->pushed) {
        l->pushed = 0;
        return ND_OK;
    }
    if (l->at_end)
        return ND_END;
    l->len = 0;
    int ioerr = 0, c, got = 0, too_long = 0, nul = 0;
    long long bytes = 0;
    while ((c = next_byte(l, &ioerr)) != EOF) {
        got = 1;
        bytes++;
        if (c == '\n')
            break;
        if (c == '\0')
            nul = 1;
        if (l->len >= ND_LINE_MAX) {
            too_long = 1;
            continue;
        }
        if (append(l, (char)c) != 0)
            return nd_fail(err, ND_ENOMEM, "%s, line %ld: out of memory reading a line", l->name,
                           l->lineno + 1);
    }
    if (ioerr)
        return nd_fail(err, ND_EIO, "%s, line %ld: read error: %s", l->name, l->lineno + 1,
                       strerror(errno));
    l->consumed += bytes;
    if (c == EOF)
        l->at_end = 1;
    if (!got)
        return ND_END;
    l->lineno++;
    while (l->len > 0 && l->buf[l->len - 1] == '\r') /* CRLF, or stray CRs before it */
        l->len--;
    if (l->lineno == 1 && l->len >= 3 && memcmp(l->buf, "\xef\xbb\xbf", 3) == 0) {
        memmove(l->buf, l->buf + 3, l->len - 3); /* a UTF-8 byte-order mark (Windows editors) */
        l->len -= 3;
    }
    if (append(l, '\0') != 0)
        return nd_fail(err, ND_ENOMEM, "%s, line %ld: out of memory reading a line", l->name,
                       l->lineno);
    l->len--;
    if (too_long)
        return nd_lines_fail(l, err, ND_EINPUT, l->lineno,
                             "line longer than %d bytes; expected a text molecule file", ND_LINE_MAX);
    if (nul)
        return nd_lines_fail(l, err, ND_EINPUT, l->lineno,
                             "line holds a NUL byte (binary data?); expected text");
    return ND_OK;
}

void nd_lines_unread(nd_lines *l)
{
    if (l->buf && l->lineno > 0)
        l->pushed = 1;
}

int nd_lines_fail(const nd_lines *l, nd_error *err, nd_status code, long line, const char *fmt, ...)
{
    if (!err)
        return code;
    char head[160], body[ND_ERROR_MSG_MAX];
    int k = snprintf(head, sizeof head, "%s", l->name);
    if (l->record > 0 && k >= 0 && (size_t)k < sizeof head)
        k += snprintf(head + k, sizeof head - (size_t)k, ", %s %d", l->unit, l->record);
    if (line > 0 && k >= 0 && (size_t)k < sizeof head)
        snprintf(head + k, sizeof head - (size_t)k, ", line %ld", line);
    va_list ap;
    va_start(ap, fmt);
    vsnprintf(body, sizeof body, fmt, ap);
    va_end(ap);
    nd_fail(err, code, "%s", body);
    nd_error_prefix(err, "%s", head);
    return code;
}

/* Parses a plain decimal number ("-1.25", "3e-2", ".5"; no hex, no inf/nan
 * words) into *out. Returns 0, -1 if s is not a number, -2 if it is not
 * finite (overflow or an inf/nan word). */
int nd_text_double(const char *s, double *out)
{
    const char *p = s;
    int digits = 0;
    if (*p == '+' || *p == '-')
        p++;
    while (isdigit((unsigned char)*p)) {
        p++;
        digits++;
    }
    if (*p == '.') {
        p++;
        while (isdigit((unsigned char)*p)) {
            p++;
            digits++;
        }
    }
    if (digits > 0 && (*p == 'e' || *p == 'E' || *p == 'd' || *p == 'D')) {
        const char *q = p + 1;
        if (*q == '+' || *q == '-')
            q++;
        if (isdigit((unsigned char)*q)) {
            while (isdigit((unsigned char)*q))
                q++;
            p = q;
        }
    }
    if (digits == 0 || *p != '\0') {
        /* inf, nan, infinity in any case: a number, but not a finite one */
        const char *w = s + (*s == '+' || *s == '-');
        if (strcasecmp(w, "inf") == 0 || strcasecmp(w, "infinity") == 0 ||
            strncasecmp(w, "nan", 3) == 0)
            return -2;
        return -1;
    }
    char tmp[64];
    const char *num = s;
    if (strpbrk(s, "dD")) { /* Fortran exponent letter */
        size_t n = strlen(s);
        if (n >= sizeof tmp)
            return -1;
        memcpy(tmp, s, n + 1);
        for (char *c = tmp; *c; c++)
            if (*c == 'd' || *c == 'D')
                *c = 'e';
        num = tmp;
    }
    errno = 0;
    double v = strtod(num, NULL);
    if (!isfinite(v))
        return -2;
    *out = v;
    return 0;
}


int nd_text_long(const char *s, long *out)
{
    const char *p = s;
    int neg = 0;
    if (*p == '+' || *p == '-')
        neg = *p++ == '-';
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
    *out = neg ? -v : v;
    return 0;
}
