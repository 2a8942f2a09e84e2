/* Descriptor parameters to and from JSON (descriptor_json.h). */
#include "potential/descriptor_json.h"
#include "core/readfile.h"
#include "core/report.h"

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

void nd_descriptor_json_add(cJSON *d, const nd_descriptor_params *p)
{
    nd_report_add_exact(d, "radial_cutoff", p->radial_cutoff);
    cJSON *r = cJSON_AddArrayToObject(d, "radial");
    for (int i = 0; r && i < p->nradial; i++) {
        cJSON *o = cJSON_CreateObject();
        nd_report_add_exact(o, "eta", p->radial_eta[i]);
        nd_report_add_exact(o, "shift", p->radial_shift[i]);
        cJSON_AddItemToArray(r, o);
    }
    nd_report_add_exact(d, "angular_cutoff", p->angular_cutoff);
    cJSON *a = cJSON_AddArrayToObject(d, "angular");
    for (int i = 0; a && i < p->nangular; i++) {
        cJSON *o = cJSON_CreateObject();
        nd_report_add_exact(o, "eta", p->angular_eta[i]);
        cJSON_AddNumberToObject(o, "zeta", p->angular_zeta[i]);
        cJSON_AddNumberToObject(o, "lambda", p->angular_lambda[i]);
        cJSON_AddItemToArray(a, o);
    }
}

/* Number member key of o (entry number idx of list, when list is not NULL). */
static int get_num(const cJSON *o, const char *key, const char *where, const char *list, int idx,
                   double *v, nd_error *err)
{
    const cJSON *j = cJSON_IsObject(o) ? cJSON_GetObjectItemCaseSensitive(o, key) : NULL;
    if (!cJSON_IsNumber(j)) {
        if (list)
            return nd_fail(err, ND_EINPUT, "%s: \"%s\" entry %d lacks the number \"%s\"", where,
                           list, idx + 1, key);
        return nd_fail(err, ND_EINPUT, "%s lacks the number \"%s\"", where, key);
    }
    *v = j->valuedouble;
    return ND_OK;
}

/* Integer member (a number with no fractional part, within int range). */
static int get_int(const cJSON *o, const char *key, const char *where, const char *list, int idx,
                   int *v, nd_error *err)
{
    double d = 0;
    int s = get_num(o, key, where, list, idx, &d, err);
    if (s)
        return s;
    if (!(d == floor(d) && fabs(d) < 2e9))
        return nd_fail(err, ND_EINPUT, "%s: \"%s\" entry %d: \"%s\" = %g is not a small whole number",
                       where, list, idx + 1, key, d);
    *v = (int)d;
    return ND_OK;
}

int nd_descriptor_json_read(const cJSON *d, const char *where, nd_descriptor_params *p,
                            nd_error *err)
{
    memset(p, 0, sizeof *p);
    if (!cJSON_IsObject(d))
        return nd_fail(err, ND_EINPUT, "%s is not a JSON object", where);
    int s;
    if ((s = get_num(d, "radial_cutoff", where, NULL, 0, &p->radial_cutoff, err)) ||
        (s = get_num(d, "angular_cutoff", where, NULL, 0, &p->angular_cutoff, err)))
        return s;
    const cJSON *ra = cJSON_GetObjectItemCaseSensitive(d, "radial");
    const cJSON *an = cJSON_GetObjectItemCaseSensitive(d, "angular");
    if (!cJSON_IsArray(ra) || !cJSON_IsArray(an))
        return nd_fail(err, ND_EINPUT, "%s lacks the \"radial\" or \"angular\" list", where);
    p->nradial = cJSON_GetArraySize(ra);
    p->nangular = cJSON_GetArraySize(an);
    if (p->nradial > ND_DESC_MAX_RADIAL || p->nangular > ND_DESC_MAX_ANGULAR)
        return nd_fail(err, ND_EINPUT,
                       "%s has %d radial and %d angular functions; at most %d and %d", where,
                       p->nradial, p->nangular, ND_DESC_MAX_RADIAL, ND_DESC_MAX_ANGULAR);
    for (int i = 0; i < p->nradial; i++) {
        const cJSON *o = cJSON_GetArrayItem(ra, i);
        if ((s = get_num(o, "eta", where, "radial", i, &p->radial_eta[i], err)) ||
            (s = get_num(o, "shift", where, "radial", i, &p->radial_shift[i], err)))
            return s;
    }
    for (int i = 0; i < p->nangular; i++) {
        const cJSON *o = cJSON_GetArrayItem(an, i);
        if ((s = get_num(o, "eta", where, "angular", i, &p->angular_eta[i], err)) ||
            (s = get_int(o, "zeta", where, "angular", i, &p->angular_zeta[i], err)) ||
            (s = get_int(o, "lambda", where, "angular", i, &p->angular_lambda[i], err)))
            return s;
    }
    nd_error e2;
    if (nd_descriptor_check(p, &e2)) {
        const char *m = e2.msg; /* "descriptor: ...": where already says so */
        if (strncmp(m, "descriptor: ", 12) == 0)
            m += 12;
        return nd_fail(err, ND_EINPUT, "%s: %s", where, m);
    }
    return ND_OK;
}

/* The line (from 1) holding byte off of text. */
static int line_of(const char *text, size_t off)
{
    int line = 1;
    for (size_t i = 0; i < off; i++)
        line += text[i] == '\n';
    return line;
}

int nd_descriptor_json_parse(const char *text, size_t n, const char *name,
                             nd_descriptor_params *p, nd_error *err)
{
    if (memchr(text, 0, n))
        return nd_fail(err, ND_EINPUT, "%s: holds a NUL byte; a descriptor file is JSON text",
                       name);
    const char *end = NULL;
    cJSON *doc = cJSON_ParseWithLengthOpts(text, n, &end, 0);
    if (!doc) {
        size_t off = end && end >= text && end <= text + n ? (size_t)(end - text) : 0;
        return nd_fail(err, ND_EINPUT, "%s: line %d: not valid JSON", name, line_of(text, off));
    }
    size_t k = end ? (size_t)(end - text) : n;
    while (k < n && strchr(" \t\r\n", text[k]))
        k++;
    if (k < n) {
        cJSON_Delete(doc);
        return nd_fail(err, ND_EINPUT, "%s: line %d: text after the JSON object", name,
                       line_of(text, k));
    }
    const cJSON *d = cJSON_GetObjectItemCaseSensitive(doc, "descriptor");
    char where[600];
    snprintf(where, sizeof where, "%.500s: descriptor", name);
    int s = nd_descriptor_json_read(cJSON_IsObject(d) ? d : doc, where, p, err);
    cJSON_Delete(doc);
    return s;
}

/* Largest descriptor file read: a descriptor is a few kilobytes. */
#define DESCRIPTOR_FILE_MAX (1 << 20)

int nd_descriptor_json_load(const char *path, nd_descriptor_params *p, nd_error *err)
{
    unsigned char *buf;
    size_t n;
    int s = nd_read_file(path, "descriptor file", DESCRIPTOR_FILE_MAX, &buf, &n, err);
    if (s)
        return s;
    s = nd_descriptor_json_parse((const char *)buf, n, path, p, err);
    free(buf);
    return s;
}
