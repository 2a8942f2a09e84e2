#include "core/format.h"

#include "core/lineio.h"
#include "core/sdf.h"
#include "core/smiles.h"
#include "core/xyz.h"

#include <ctype.h>
#include <errno.h>
#include <stdlib.h>
#include <string.h>
#include <strings.h>
#include <sys/stat.h>
#include <unistd.h>

/* Bytes read ahead to check or sniff the format. */
#define HEAD_BYTES 4096

nd_format nd_format_from_name(const char *name)
{
    if (!name)
        return ND_FORMAT_AUTO;
    static const struct {
        const char *word;
        nd_format f;
    } names[] = {{"xyz", ND_FORMAT_XYZ},    {"sdf", ND_FORMAT_SDF},       {"sd", ND_FORMAT_SDF},
                 {"mol", ND_FORMAT_SDF},    {"molfile", ND_FORMAT_SDF},   {"smi", ND_FORMAT_SMILES},
                 {"smiles", ND_FORMAT_SMILES}};
    for (size_t i = 0; i < sizeof names / sizeof names[0]; i++)
        if (strcasecmp(name, names[i].word) == 0)
            return names[i].f;
    return ND_FORMAT_AUTO;
}

nd_format nd_format_from_path(const char *path)
{
    if (!path)
        return ND_FORMAT_AUTO;
    const char *slash = strrchr(path, '/');
    const char *base = slash ? slash + 1 : path;
    const char *dot = strrchr(base, '.');
    if (!dot || dot == base)
        return ND_FORMAT_AUTO;
    return nd_format_from_name(dot + 1);
}

const char *nd_format_name(nd_format f)
{
    switch (f) {
    case ND_FORMAT_XYZ: return "xyz";
    case ND_FORMAT_SDF: return "sdf";
    case ND_FORMAT_SMILES: return "smiles";
    default: return "auto";
    }
}

/* Copies line k (0-based) of text[0..n) into buf (size cap, truncated);
 * returns 1 if that line exists, 0 if not. */
static int head_line(const unsigned char *text, size_t n, int k, char *buf, size_t cap)
{
    size_t i = 0;
    for (int line = 0; line < k; line++) {
        while (i < n && text[i] != '\n')
            i++;
        if (i >= n)
            return 0;
        i++;
    }
    if (i >= n)
        return 0;
    size_t j = 0;
    while (i < n && text[i] != '\n' && text[i] != '\r') {
        if (j + 1 < cap)
            buf[j++] = (char)text[i];
        i++;
    }
    buf[j] = '\0';
    return 1;
}

/* 1 if s is a lone non-negative integer with optional blanks. */
static int lone_integer(const char *s)
{
    while (isspace((unsigned char)*s))
        s++;
    if (!isdigit((unsigned char)*s))
        return 0;
    while (isdigit((unsigned char)*s))
        s++;
    while (isspace((unsigned char)*s))
        s++;
    return *s == '\0';
}

/* Guesses the format of the first bytes of a file: an SD counts line as
 * line 4 (a version tag in columns 34-39), an XYZ count alone on the first
 * non-blank line, or a first word made of SMILES characters. ND_FORMAT_AUTO
 * if none fits. *why gets a short reason for messages. */
static nd_format sniff(const unsigned char *head, size_t n, const char **why)
{
    char line[256];
    *why = "";
    if (n >= 3 && memcmp(head, "\xef\xbb\xbf", 3) == 0) { /* a UTF-8 byte-order mark */
        head += 3;
        n -= 3;
    }
    if (head_line(head, n, 3, line, sizeof line) && strlen(line) >= 39 &&
        (strncmp(line + 34, "V2000", 5) == 0 || strncmp(line + 34, "V3000", 5) == 0)) {
        *why = "line 4 is an SD counts line";
        return ND_FORMAT_SDF;
    }
    /* an old molfile without the version tag still closes with M  END */
    for (size_t i = 0; i + 7 <= n; i++)
        if (head[i] == '\n' && memcmp(head + i + 1, "M  END", 6) == 0) {
            *why = "it holds an SD 'M  END' line";
            return ND_FORMAT_SDF;
        }
    for (int k = 0; k < 16 && head_line(head, n, k, line, sizeof line); k++) {
        const char *p = line;
        while (isspace((unsigned char)*p))
            p++;
        if (!*p)
            continue;
        if (lone_integer(p)) {
            *why = k == 0 ? "line 1 holds an XYZ atom count alone"
                          : "the first non-blank line holds an XYZ atom count alone";
            return ND_FORMAT_XYZ;
        }
        if (*p == '#')
            continue;
        int letters = 0;
        for (; *p && !isspace((unsigned char)*p); p++) {
            if (isalpha((unsigned char)*p))
                letters++;
            else if (!strchr("[]()=#$:/\\@+-.%*0123456789", *p))
                return ND_FORMAT_AUTO;
        }
        if (letters) {
            *why = "the first line starts with a SMILES string";
            return ND_FORMAT_SMILES;
        }
        return ND_FORMAT_AUTO;
    }
    return ND_FORMAT_AUTO;
}

struct nd_reader {
    nd_format fmt;
    long long size;      /* input size in bytes, or -1 when unknown (a pipe) */
    FILE *f;             /* NULL for memory readers */
    int own_f;           /* close f on nd_reader_close */
    char *name;          /* name in messages */
    unsigned char *head; /* bytes read ahead for the content check; owned */
    nd_lines lines;
    int record;          /* number of the record last returned */
    int said_empty;      /* the "no records" error was returned */
    int broken;          /* a final error happened; only ND_END or errors follow */
};

/* Shared part of the two open functions: decides the format from fmt, the
 * name's extension and the head bytes, and sets up the line source. */
static int reader_setup(nd_reader *r, const char *display, const char *path_for_ext,
                        const unsigned char *mem, size_t size, nd_format fmt, nd_error *err)
{
    const char *why;
    /* a model file given as molecules would read as SMILES, one error per line */
    if (size >= 11 && memcmp(mem, "nadir-model", 11) == 0)
        return nd_fail(err, ND_EINPUT,
                       "%s: this is a nadir model file, not a molecule file; give it with --model",
                       display);
    nd_format seen = sniff(mem, size, &why);
    if (fmt == ND_FORMAT_AUTO) {
        nd_format ext = path_for_ext ? nd_format_from_path(path_for_ext) : ND_FORMAT_AUTO;
        if (ext == ND_FORMAT_AUTO) {
            if (size == 0)
                return nd_fail(err, ND_EINPUT, "%s: empty input; expected molecule records",
                               display);
            if (seen == ND_FORMAT_AUTO)
                return nd_fail(err, ND_EINPUT,
                               "%s: cannot tell the format (neither the name nor the first lines "
                               "say XYZ, SD or SMILES); name the format",
                               display);
            fmt = seen;
        } else {
            /* the content check: a strong sign of another format wins over
             * the name; a weak SMILES guess does not, the reader explains */
            if (seen != ND_FORMAT_AUTO && seen != ext && seen != ND_FORMAT_SMILES)
                return nd_fail(err, ND_EINPUT,
                               "%s: the name says %s but %s; rename the file or name the format",
                               display, nd_format_name(ext), why);
            fmt = ext;
        }
    }
    if (fmt != ND_FORMAT_XYZ && fmt != ND_FORMAT_SDF && fmt != ND_FORMAT_SMILES)
        return nd_fail(err, ND_EINVAL, "%s: unknown format code %d", display, (int)fmt);
    r->fmt = fmt;
    nd_lines_init(&r->lines, r->name,
                  fmt == ND_FORMAT_XYZ ? "frame" : fmt == ND_FORMAT_SDF ? "record" : "record",
                  mem, size, r->f);
    return ND_OK;
}

/* Allocates a reader with its display name; NULL on no memory. */
static nd_reader *reader_alloc(const char *display)
{
    nd_reader *r = calloc(1, sizeof *r);
    if (!r)
        return NULL;
    size_t n = strlen(display) + 1;
    r->name = malloc(n);
    if (!r->name) {
        free(r);
        return NULL;
    }
    memcpy(r->name, display, n);
    return r;
}

int nd_reader_open(nd_reader **out, const char *path, nd_format fmt, nd_error *err)
{
    *out = NULL;
    if (!path || !path[0])
        return nd_fail(err, ND_EINVAL, "no input file named");
    int is_stdin = strcmp(path, "-") == 0;
    nd_reader *r = reader_alloc(is_stdin ? "stdin" : path);
    int status = ND_ENOMEM;
    if (!r) {
        nd_fail(err, ND_ENOMEM, "out of memory opening %s", path);
        goto fail;
    }
    if (is_stdin) {
        r->f = stdin;
    } else {
        r->f = fopen(path, "rb");
        if (!r->f) {
            status = nd_fail(err, ND_EIO, "cannot open %s: %s", path, strerror(errno));
            goto fail;
        }
        r->own_f = 1;
    }
    struct stat st;
    r->size = -1;
    if (fstat(fileno(r->f), &st) == 0) {
        if (S_ISDIR(st.st_mode)) {
            status = nd_fail(err, ND_EIO, "cannot read %s: it is a directory", path);
            goto fail;
        }
        if (S_ISREG(st.st_mode))
            r->size = (long long)st.st_size;
    }
    r->head = malloc(HEAD_BYTES);
    if (!r->head) {
        nd_fail(err, ND_ENOMEM, "out of memory opening %s", path);
        goto fail;
    }
    size_t got = fread(r->head, 1, HEAD_BYTES, r->f);
    if (got < HEAD_BYTES && ferror(r->f)) {
        status = nd_fail(err, ND_EIO, "cannot read %s: %s", r->name, strerror(errno));
        goto fail;
    }
    status = reader_setup(r, r->name, is_stdin ? NULL : path, r->head, got, fmt, err);
    if (status != ND_OK)
        goto fail;
    *out = r;
    return ND_OK;
fail:
    nd_reader_close(r);
    return status;
}

int nd_reader_open_memory(nd_reader **out, const char *name, const void *data, size_t size,
                          nd_format fmt, nd_error *err)
{
    *out = NULL;
    nd_reader *r = reader_alloc(name ? name : "memory");
    if (!r)
        return nd_fail(err, ND_ENOMEM, "out of memory opening %s", name ? name : "memory");
    r->size = (long long)size;
    int status = reader_setup(r, r->name, name, data, size, fmt, err);
    if (status != ND_OK) {
        nd_reader_close(r);
        return status;
    }
    *out = r;
    return ND_OK;
}

/* Reads one record of a SMILES file: skips blank lines and lines starting
 * with '#'; the first word is the SMILES, the rest of the line its name. */
static int smiles_next(nd_lines *l, nd_molecule *mol, nd_error *err)
{
    nd_molecule_clear(mol);
    l->record++; /* provisionally: messages name the record being begun */
    for (;;) {
        int s = nd_lines_next(l, err);
        if (s == ND_END)
            l->record--;
        if (s != ND_OK)
            return s;
        char *p = l->buf;
        while (isspace((unsigned char)*p))
            p++;
        if (!*p || *p == '#')
            continue;
        char *e = p;
        while (*e && !isspace((unsigned char)*e))
            e++;
        char *name = e;
        if (*name)
            *name++ = '\0';
        while (isspace((unsigned char)*name))
            name++;
        size_t nl = strlen(name);
        while (nl > 0 && isspace((unsigned char)name[nl - 1]))
            name[--nl] = '\0';
        long col0 = (long)(p - l->buf); /* SMILES columns count from the word's start */
        s = nd_smiles_parse(p, mol, err);
        if (s != ND_OK) {
            if (col0 > 0 && err)
                nd_error_prefix(err, "(word starts at column %ld)", col0 + 1);
            nd_error_prefix(err, "%s, %s %d, line %ld", l->name, l->unit, l->record, l->lineno);
            return s;
        }
        if (*name && nd_molecule_set_title(mol, name, err) != ND_OK)
            return ND_ENOMEM;
        return ND_OK;
    }
}

int nd_reader_next(nd_reader *r, nd_molecule *mol, nd_error *err)
{
    if (r->broken)
        return nd_fail(err, ND_EIO, "%s: reading cannot go on after the previous error", r->name);
    int s;
    switch (r->fmt) {
    case ND_FORMAT_XYZ: s = nd_xyz_read(&r->lines, mol, err); break;
    case ND_FORMAT_SDF: s = nd_sdf_read(&r->lines, mol, err); break;
    default: s = smiles_next(&r->lines, mol, err); break;
    }
    r->record = r->lines.record;
    if (s == ND_END) {
        if (r->lines.record == 0 && !r->said_empty) {
            r->said_empty = 1;
            return nd_fail(err, ND_EINPUT, "%s, line %ld: no %s records in the input (empty file?)",
                           r->name, r->lines.lineno + 1, nd_format_name(r->fmt));
        }
        return ND_END;
    }
    if (s == ND_OK) {
        s = nd_molecule_validate(mol, err);
        if (s != ND_OK)
            nd_error_prefix(err, "%s, %s %d", r->name, r->lines.unit, r->record);
        return s;
    }
    if (s != ND_EINPUT)
        r->broken = 1;
    return s;
}

int nd_reader_record(const nd_reader *r)
{
    return r ? r->record : 0;
}

nd_format nd_reader_format(const nd_reader *r)
{
    return r ? r->fmt : ND_FORMAT_AUTO;
}

int nd_reader_bytes(const nd_reader *r, long long *done, long long *total)
{
    *done = r ? r->lines.consumed : 0;
    *total = r ? r->size : -1;
    return r && r->size >= 0;
}

const char *nd_reader_name(const nd_reader *r)
{
    return r ? r->name : "";
}

void nd_reader_close(nd_reader *r)
{
    if (!r)
        return;
    if (r->f && r->own_f)
        fclose(r->f);
    nd_lines_free(&r->lines);
    free(r->head);
    free(r->name);
    free(r);
}

struct nd_writer {
    nd_format fmt;
    FILE *f;
    char *path; /* final name; NULL for stdout */
    char *tmp;  /* temporary name in the same directory */
    int records;
};

int nd_writer_open(nd_writer **out, const char *path, nd_format fmt, nd_error *err)
{
    *out = NULL;
    if (!path || !path[0])
        return nd_fail(err, ND_EINVAL, "no output file named");
    int is_stdout = strcmp(path, "-") == 0;
    if (fmt == ND_FORMAT_AUTO)
        fmt = is_stdout ? ND_FORMAT_AUTO : nd_format_from_path(path);
    if (fmt == ND_FORMAT_AUTO)
        return nd_fail(err, ND_EINVAL,
                       "%s: cannot tell the output format from the name; use a .xyz, .sdf or "
                       ".smi name or name the format",
                       is_stdout ? "stdout" : path);
    nd_writer *w = calloc(1, sizeof *w);
    int status = ND_ENOMEM;
    int fd = -1;
    if (!w)
        goto nomem;
    w->fmt = fmt;
    if (is_stdout) {
        w->f = stdout;
        *out = w;
        return ND_OK;
    }
    size_t n = strlen(path);
    w->path = malloc(n + 1);
    w->tmp = malloc(n + 32);
    if (!w->path || !w->tmp)
        goto nomem;
    memcpy(w->path, path, n + 1);
    const char *slash = strrchr(path, '/');
    size_t dirlen = slash ? (size_t)(slash - path) + 1 : 0;
    snprintf(w->tmp, n + 32, "%.*s.%s.part-XXXXXX", (int)dirlen, path, path + dirlen);
    fd = mkstemp(w->tmp);
    if (fd < 0) {
        status = nd_fail(err, ND_EIO, "cannot create a file beside %s: %s", path, strerror(errno));
        free(w->tmp);
        w->tmp = NULL;
        goto fail;
    }
    (void)fchmod(fd, 0644); /* mkstemp makes 0600; a result file is readable: common practice */
    w->f = fdopen(fd, "w");
    if (!w->f) {
        close(fd);
        goto nomem;
    }
    *out = w;
    return ND_OK;
nomem:
    status = nd_fail(err, ND_ENOMEM, "out of memory opening %s", path);
fail:
    nd_writer_abort(w);
    return status;
}

int nd_writer_write(nd_writer *w, const nd_molecule *mol, nd_error *err)
{
    int s;
    const char *where = w->path ? w->path : "stdout";
    switch (w->fmt) {
    case ND_FORMAT_XYZ: s = nd_xyz_write(w->f, mol, err); break;
    case ND_FORMAT_SDF: s = nd_sdf_write(w->f, mol, err); break;
    default: {
        char *smi = NULL;
        s = nd_smiles_write(mol, &smi, err);
        if (s == ND_OK) {
            fputs(smi, w->f);
            if (mol->title && mol->title[0]) {
                putc(' ', w->f);
                for (const char *c = mol->title; *c; c++)
                    putc(*c == '\n' || *c == '\r' ? ' ' : *c, w->f);
            }
            putc('\n', w->f);
            if (ferror(w->f))
                s = nd_fail(err, ND_EIO, "write error: %s", strerror(errno));
        }
        free(smi);
        break;
    }
    }
    if (s != ND_OK) {
        /* a record that cannot be written is not in the output: name the file
         * only (callers add where the record came from) */
        nd_error_prefix(err, "cannot write to %s", where);
        return s;
    }
    w->records++;
    return ND_OK;
}

int nd_writer_close(nd_writer *w, nd_error *err)
{
    if (!w)
        return ND_OK;
    int status = ND_OK;
    if (!w->path) { /* stdout */
        if (fflush(stdout) != 0 || ferror(stdout))
            status = nd_fail(err, ND_EIO, "stdout: write error: %s", strerror(errno));
        free(w);
        return status;
    }
    int bad = fflush(w->f) != 0 || ferror(w->f);
    if (!bad && fsync(fileno(w->f)) != 0 && errno != EINVAL)
        bad = 1;
    int saved = errno;
    if (fclose(w->f) != 0 && !bad) {
        bad = 1;
        saved = errno;
    }
    w->f = NULL;
    if (bad) {
        status = nd_fail(err, ND_EIO, "%s: write error: %s", w->path, strerror(saved));
    } else if (rename(w->tmp, w->path) != 0) {
        status = nd_fail(err, ND_EIO, "cannot move the finished file to %s: %s", w->path,
                         strerror(errno));
    } else {
        free(w->tmp);
        w->tmp = NULL;
    }
    nd_writer_abort(w);
    return status;
}

void nd_writer_abort(nd_writer *w)
{
    if (!w)
        return;
    if (w->f && w->f != stdout)
        fclose(w->f);
    if (w->tmp)
        unlink(w->tmp);
    free(w->tmp);
    free(w->path);
    free(w);
}
