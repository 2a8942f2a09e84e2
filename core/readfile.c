/* Whole-file input (readfile.h). */
#include "core/readfile.h"

#include <errno.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

int nd_read_file(const char *path, const char *what, size_t max, unsigned char **out, size_t *len,
                 nd_error *err)
{
    *out = NULL;
    *len = 0;
    FILE *f = fopen(path, "rb");
    if (!f)
        return nd_fail(err, ND_EIO, "%s: cannot open the %s: %s", path, what, strerror(errno));
    size_t cap = 1 << 16, n = 0;
    unsigned char *b = malloc(cap + 1);
    while (b) {
        n += fread(b + n, 1, cap - n, f);
        if (n < cap || (max > 0 && n > max))
            break;
        cap *= 2;
        unsigned char *nb = realloc(b, cap + 1);
        if (!nb) {
            free(b);
            b = NULL;
        } else
            b = nb;
    }
    int rerr = ferror(f), rerrno = errno;
    fclose(f);
    if (!b)
        return nd_fail(err, ND_ENOMEM, "%s: out of memory reading the %s", path, what);
    if (rerr) {
        free(b);
        return nd_fail(err, ND_EIO, "%s: cannot read the %s: %s", path, what, strerror(rerrno));
    }
    if (max > 0 && n > max) {
        free(b);
        return nd_fail(err, ND_EINPUT, "%s: over %zu bytes, too large for a %s", path, max, what);
    }
    b[n] = 0;
    *out = b;
    *len = n;
    return ND_OK;
}
