#include "cli/cli.h"

#include <stdatomic.h>

#include <cjson/cJSON.h>
#include <errno.h>
#include <limits.h>
#include <math.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>

int cli_exit_code(int status)
{
    switch (status) {
    case ND_OK: return ND_EXIT_OK;
    case ND_EINVAL: return ND_EXIT_USAGE;
    case ND_EINPUT:
    case ND_EIO:
    case ND_EDOMAIN: return ND_EXIT_INPUT;
    case ND_ECOMPUTE:
    case ND_EEXTERNAL:
    case ND_CONTINUE: return ND_EXIT_COMPUTE;
    default: return ND_EXIT_INTERNAL;
    }
}

int cli_fail(const char *command, int status, const char *fmt, ...)
{
    va_list ap;
    va_start(ap, fmt);
    fprintf(stderr, "nadir %s: ", command);
    vfprintf(stderr, fmt, ap);
    fputc('\n', stderr);
    va_end(ap);
    return cli_exit_code(status);
}

int cli_error(const char *command, const nd_error *err)
{
    fprintf(stderr, "nadir %s: %s\n", command, err->msg[0] ? err->msg : nd_status_name(err->code));
    return cli_exit_code(err->code);
}

int cli_usage(const char *command, const char *fmt, ...)
{
    va_list ap;
    va_start(ap, fmt);
    fprintf(stderr, "nadir %s: ", command);
    vfprintf(stderr, fmt, ap);
    fprintf(stderr, "\n(see: nadir %s --help)\n", command);
    va_end(ap);
    return ND_EXIT_USAGE;
}

int cli_parse_double(const char *s, double *out)
{
    char *end;
    errno = 0;
    double v = strtod(s, &end);
    if (end == s || *end != '\0' || errno == ERANGE)
        return -1;
    *out = v;
    return 0;
}

int cli_parse_int(const char *s, int *out)
{
    char *end;
    errno = 0;
    long v = strtol(s, &end, 10);
    if (end == s || *end != '\0' || errno == ERANGE || v < INT_MIN || v > INT_MAX)
        return -1;
    *out = (int)v;
    return 0;
}

int cli_open_structures(const char *command, const char *path, nd_format fmt, nd_reader **r)
{
    nd_error err;
    if (nd_reader_open(r, path, fmt, &err) == ND_OK)
        return 0;
    if (strcmp(path, "-") != 0 && access(path, F_OK) != 0 && errno == ENOENT) {
        nd_reader *sr = NULL;
        nd_molecule m;
        nd_molecule_init(&m);
        int smiles = nd_reader_open_memory(&sr, "argument", path, strlen(path), ND_FORMAT_SMILES,
                                           NULL) == ND_OK &&
                     nd_reader_next(sr, &m, NULL) == ND_OK;
        nd_molecule_free(&m);
        nd_reader_close(sr);
        if (smiles)
            return cli_fail(command, ND_EIO,
                            "no file named '%s'; it reads as SMILES, but %s needs 3D structures: "
                            "build them first (nadir build '%s' -o start.sdf)%s",
                            path, command, path,
                            strcmp(command, "label") == 0
                                ? ""
                                : ", or use nadir conformers, which takes SMILES");
    }
    return cli_error(command, &err);
}

int cli_check_output(const char *command, const char *option, const char *path)
{
    if (!path || strcmp(path, "-") == 0)
        return 0;
    struct stat sb;
    if (stat(path, &sb) == 0 && S_ISDIR(sb.st_mode))
        return cli_fail(command, ND_EIO, "%s %s: is a directory; expected a file name", option,
                        path);
    char dir[4096];
    const char *slash = strrchr(path, '/');
    if (!slash)
        snprintf(dir, sizeof dir, ".");
    else if (slash == path)
        snprintf(dir, sizeof dir, "/");
    else
        snprintf(dir, sizeof dir, "%.*s", (int)(slash - path), path);
    if (stat(dir, &sb) != 0 || !S_ISDIR(sb.st_mode))
        return cli_fail(command, ND_EIO, "%s %s: directory %s does not exist", option, path, dir);
    if (access(dir, W_OK | X_OK) != 0)
        return cli_fail(command, ND_EIO, "%s %s: cannot write in directory %s: %s", option, path,
                        dir, strerror(errno));
    return 0;
}

int cli_close_contact(const nd_molecule *mol, char *buf, size_t size)
{
    if (size)
        buf[0] = '\0';
    if (!mol || !mol->xyz || mol->dimension == 0)
        return 0;
    const double *x = mol->xyz;
    double best = INFINITY;
    int a = 0, b = 0;
    for (int i = 0; i < mol->natoms; i++)
        for (int j = i + 1; j < mol->natoms; j++) {
            double dx = x[3 * i] - x[3 * j], dy = x[3 * i + 1] - x[3 * j + 1],
                   dz = x[3 * i + 2] - x[3 * j + 2];
            double d = sqrt(dx * dx + dy * dy + dz * dz);
            if (d < best) {
                best = d;
                a = i;
                b = j;
            }
        }
    if (!(best < 0.5))
        return 0;
    snprintf(buf, size, " (atoms %d and %d are only %.3f A apart)", a + 1, b + 1, best);
    return 1;
}

void cli_model_notice(const char *command, const char *path, const nd_model *model)
{
    cJSON *prov = cJSON_Parse(nd_model_provenance(model));
    const cJSON *status = cJSON_GetObjectItemCaseSensitive(prov, "status");
    if (cJSON_IsString(status) && status->valuestring[0])
        fprintf(stderr, "nadir %s: note: model %s is marked \"%s\"\n", command, path,
                status->valuestring);
    cJSON_Delete(prov);
}

int cli_size_note(const char *command, const nd_model *model, const nd_molecule *mol,
                  const char *where)
{
    if (!model || !mol)
        return 0;
    cJSON *prov = cJSON_Parse(nd_model_provenance(model));
    const cJSON *sz = cJSON_GetObjectItemCaseSensitive(prov, "training_sizes");
    const cJSON *hm = cJSON_GetObjectItemCaseSensitive(sz, "heavy_atoms_max");
    int max = cJSON_IsNumber(hm) ? (int)hm->valuedouble : 0;
    cJSON_Delete(prov);
    int heavy = 0;
    for (int i = 0; i < mol->natoms; i++)
        heavy += mol->z[i] > 1;
    if (max <= 0 || heavy <= max)
        return 0;
    /* a file of 2,000 frames of one ligand gave 2,000 identical notes: the
     * first few say it (the JSON reports flag every record) */
    static _Atomic int noted;
    int k = atomic_fetch_add(&noted, 1);
    if (k < CLI_SIZE_NOTES)
        fprintf(stderr,
                "nadir %s: note: %s has %d heavy atoms; the model was trained on molecules of at "
                "most %d, so this is outside its size domain: energies may be off by more than "
                "the ensemble spread suggests\n",
                command, where, heavy, max);
    else if (k == CLI_SIZE_NOTES)
        fprintf(stderr,
                "nadir %s: note: further records outside the model's size domain are not listed "
                "one by one\n",
                command);
    return 1;
}

/* Finds the model file when --model is not given: next to the program
 * (BIN/../share/nadir/models/default.model), then in the source tree
 * (potential/models/default.model from the current directory and from
 * BIN/..). Writes the path into out; 0 if found. */
int cli_find_model(char *out, size_t size, char *looked, size_t lsize)
{
    char exe[PATH_MAX], cand[3][PATH_MAX + 64];
    int nc = 0;
    ssize_t n = readlink("/proc/self/exe", exe, sizeof exe - 1);
    if (n > 0) {
        exe[n] = '\0';
        char *slash = strrchr(exe, '/');
        if (slash)
            *slash = '\0';
        snprintf(cand[nc++], sizeof cand[0], "%s/../share/nadir/models/default.model", exe);
        snprintf(cand[nc++], sizeof cand[0], "%s/../potential/models/default.model", exe);
    }
    snprintf(cand[nc++], sizeof cand[0], "potential/models/default.model");
    size_t k = 0;
    looked[0] = '\0';
    for (int i = 0; i < nc; i++) {
        size_t len = strlen(cand[i]);
        if (access(cand[i], R_OK) == 0 && len < size) {
            /* the plain path (no "bin/../") in messages and reports */
            char *plain = realpath(cand[i], NULL);
            if (plain && strlen(plain) < size)
                memcpy(out, plain, strlen(plain) + 1);
            else
                memcpy(out, cand[i], len + 1);
            free(plain);
            return 0;
        }
        const char *parts[2] = {i ? ", " : "", cand[i]};
        for (int q = 0; q < 2; q++)
            for (const char *c = parts[q]; *c && k + 1 < lsize; c++)
                looked[k++] = *c;
        looked[k] = '\0';
    }
    return -1;
}

int cli_model_path(const char *command, const char *given, int external_ok, char *out,
                   size_t size)
{
    char looked[4 * PATH_MAX];
    if (given) {
        snprintf(out, size, "%s", given);
        return 0;
    }
    if (cli_find_model(out, size, looked, sizeof looked) == 0)
        return 0;
    return cli_usage(command, "no potential given and no bundled model found (looked for %s): "
                              "pass --model FILE%s", looked,
                     external_ok ? " or --potential-command CMD" : "");
}

int cli_finish(const char *command, const cJSON *doc, int to_stdout, const char *report,
               nd_writer **w1, nd_writer **w2)
{
    nd_error err;
    nd_error_clear(&err);
    if (doc && to_stdout && nd_report_write(doc, "-", &err) != ND_OK)
        return cli_error(command, &err);
    if (doc && report && nd_report_write(doc, report, &err) != ND_OK)
        return cli_error(command, &err);
    nd_writer **ws[2] = {w1, w2};
    for (int i = 0; i < 2; i++) {
        if (!ws[i] || !*ws[i])
            continue;
        int s = nd_writer_close(*ws[i], &err);
        *ws[i] = NULL;
        if (s != ND_OK)
            return cli_error(command, &err);
    }
    return 0;
}
