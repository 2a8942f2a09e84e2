#include "core/report.h"

#include <errno.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>

int nd_report_write(const cJSON *doc, const char *path, nd_error *err)
{
    if (!doc || !path || !path[0])
        return nd_fail(err, ND_EINVAL, "nd_report_write: no document or no path");
    char *text = cJSON_Print(doc);
    char *tmp = NULL;
    FILE *f = NULL;
    int status = ND_OK;
    if (!text) {
        status = nd_fail(err, ND_ENOMEM, "out of memory writing %s", path);
        goto fail;
    }
    if (strcmp(path, "-") == 0) {
        if (fputs(text, stdout) == EOF || putchar('\n') == EOF || fflush(stdout) != 0)
            status = nd_fail(err, ND_EIO, "stdout: write error: %s", strerror(errno));
        goto fail;
    }
    size_t n = strlen(path);
    tmp = malloc(n + 32);
    if (!tmp) {
        status = nd_fail(err, ND_ENOMEM, "out of memory writing %s", path);
        goto fail;
    }
    const char *slash = strrchr(path, '/');
    size_t dirlen = slash ? (size_t)(slash - path) + 1 : 0;
    snprintf(tmp, n + 32, "%.*s.%s.part-XXXXXX", (int)dirlen, path, path + dirlen);
    int fd = mkstemp(tmp);
    if (fd < 0) {
        status = nd_fail(err, ND_EIO, "cannot create a file beside %s: %s", path, strerror(errno));
        free(tmp);
        tmp = NULL;
        goto fail;
    }
    (void)fchmod(fd, 0644);
    f = fdopen(fd, "w");
    if (!f) {
        close(fd);
        status = nd_fail(err, ND_EIO, "cannot write %s: %s", path, strerror(errno));
        goto fail;
    }
    int bad = fputs(text, f) == EOF || fputc('\n', f) == EOF || fflush(f) != 0 ||
              fsync(fileno(f)) != 0;
    int saved = errno;
    if (fclose(f) != 0 && !bad) {
        bad = 1;
        saved = errno;
    }
    f = NULL;
    if (bad) {
        status = nd_fail(err, ND_EIO, "%s: write error: %s", path, strerror(saved));
        goto fail;
    }
    if (rename(tmp, path) != 0) {
        status = nd_fail(err, ND_EIO, "cannot move the finished file to %s: %s", path,
                         strerror(errno));
        goto fail;
    }
    free(tmp);
    tmp = NULL;
fail:
    if (tmp) {
        unlink(tmp);
        free(tmp);
    }
    free(text);
    return status;
}

cJSON *nd_report_molecule(const nd_molecule *m)
{
    cJSON *o = cJSON_CreateObject();
    if (!o)
        return NULL;
    char small[128];
    int need = nd_molecule_formula(m, small, (int)sizeof small);
    char *formula = small;
    if (need >= (int)sizeof small) {
        formula = malloc((size_t)need + 1);
        if (!formula)
            goto fail;
        nd_molecule_formula(m, formula, need + 1);
    }
    int ok = (m->title ? cJSON_AddStringToObject(o, "title", m->title) != NULL
                       : cJSON_AddNullToObject(o, "title") != NULL) &&
             cJSON_AddStringToObject(o, "formula", formula) != NULL &&
             cJSON_AddNumberToObject(o, "atoms", m->natoms) != NULL &&
             cJSON_AddNumberToObject(o, "molar_mass", nd_molecule_mass(m)) != NULL &&
             cJSON_AddNumberToObject(o, "total_charge", m->charge) != NULL &&
             (!m->has_bonds || cJSON_AddNumberToObject(o, "bonds", m->nbonds) != NULL) &&
             cJSON_AddNumberToObject(o, "data_items", m->ndata) != NULL;
    if (formula != small)
        free(formula);
    if (!ok)
        goto fail;
    return o;
fail:
    cJSON_Delete(o);
    return NULL;
}

int nd_report_add_numbers(cJSON *obj, const char *name, const double *v, int n, nd_error *err)
{
    if (!obj || !name || n < 0 || (n > 0 && !v))
        return nd_fail(err, ND_EINVAL, "nd_report_add_numbers: bad arguments");
    cJSON *a = cJSON_CreateArray();
    if (!a)
        goto nomem;
    for (int i = 0; i < n; i++) {
        cJSON *x = isfinite(v[i]) ? cJSON_CreateNumber(v[i]) : cJSON_CreateNull();
        if (!x || !cJSON_AddItemToArray(a, x)) {
            cJSON_Delete(x);
            cJSON_Delete(a);
            goto nomem;
        }
    }
    if (!cJSON_AddItemToObject(obj, name, a)) {
        cJSON_Delete(a);
        goto nomem;
    }
    return ND_OK;
nomem:
    return nd_fail(err, ND_ENOMEM, "out of memory adding %s", name);
}

struct nd_report_lines {
    FILE *f;
    char *path;
};

int nd_report_lines_open(nd_report_lines **out, const char *path, nd_error *err)
{
    *out = NULL;
    if (!path || !path[0])
        return nd_fail(err, ND_EINVAL, "no JSON Lines file named");
    nd_report_lines *j = calloc(1, sizeof *j);
    if (!j)
        return nd_fail(err, ND_ENOMEM, "out of memory opening %s", path);
    size_t n = strlen(path) + 1;
    j->path = malloc(n);
    if (!j->path) {
        free(j);
        return nd_fail(err, ND_ENOMEM, "out of memory opening %s", path);
    }
    memcpy(j->path, path, n);
    if (strcmp(path, "-") == 0) {
        j->f = stdout;
    } else if (!(j->f = fopen(path, "a"))) {
        int e = errno;
        free(j->path);
        free(j);
        return nd_fail(err, ND_EIO, "cannot open %s for appending: %s", path, strerror(e));
    }
    *out = j;
    return ND_OK;
}

int nd_report_lines_write(nd_report_lines *j, const cJSON *item, nd_error *err)
{
    char *text = cJSON_PrintUnformatted(item);
    if (!text)
        return nd_fail(err, ND_ENOMEM, "out of memory writing %s", j->path);
    /* cJSON's compact form has no raw line breaks: strings escape them */
    int bad = fputs(text, j->f) == EOF || fputc('\n', j->f) == EOF || fflush(j->f) != 0;
    free(text);
    if (bad)
        return nd_fail(err, ND_EIO, "%s: write error: %s", j->path, strerror(errno));
    return ND_OK;
}

int nd_report_lines_close(nd_report_lines *j, nd_error *err)
{
    if (!j)
        return ND_OK;
    int status = ND_OK;
    if (j->f == stdout) {
        if (fflush(stdout) != 0)
            status = nd_fail(err, ND_EIO, "stdout: write error: %s", strerror(errno));
    } else if (fclose(j->f) != 0) {
        status = nd_fail(err, ND_EIO, "%s: close failed: %s", j->path, strerror(errno));
    }
    free(j->path);
    free(j);
    return status;
}

char *nd_report_exact(double v, char *buf)
{
    for (int prec = 15; prec <= 17; prec++) {
        snprintf(buf, 32, "%.*g", prec, v);
        if (strtod(buf, NULL) == v)
            break;
    }
    return buf;
}

void nd_report_add_exact(cJSON *o, const char *key, double v)
{
    char buf[40];
    cJSON_AddRawToObject(o, key, nd_report_exact(v, buf));
}
