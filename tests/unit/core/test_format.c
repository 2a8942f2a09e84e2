/* Format dispatch: names and extensions, the content check, stdin-style
 * sniffing, reading the sample files in tests/data, the atomic writer,
 * SMILES files, fuzz regressions, and failing each allocation in turn. */
#include "tests/lib/testutil.h"

#include "core/elements.h"
#include "core/format.h"

#include <dirent.h>
#include <errno.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>

/* --- fault injection (not under AddressSanitizer, which owns malloc) --- */
#if defined(__SANITIZE_ADDRESS__)
#define ND_FAULTS 0
#else
#define ND_FAULTS 1
void *__libc_malloc(size_t n);
void *__libc_calloc(size_t n, size_t m);
void *__libc_realloc(void *p, size_t n);
void __libc_free(void *p);
static long fault_countdown = -1; /* fail the allocation when this reaches 0; -1 = never */
static long fault_hits = 0;
static long live = 0;             /* allocations not yet freed */

static int fault_now(void)
{
    if (fault_countdown < 0)
        return 0;
    if (fault_countdown-- == 0) {
        fault_hits++;
        return 1;
    }
    return 0;
}

void *malloc(size_t n)
{
    if (fault_now())
        return NULL;
    void *p = __libc_malloc(n);
    if (p)
        live++;
    return p;
}

void *calloc(size_t n, size_t m)
{
    if (fault_now())
        return NULL;
    void *p = __libc_calloc(n, m);
    if (p)
        live++;
    return p;
}

void *realloc(void *old, size_t n)
{
    if (fault_now())
        return NULL;
    void *p = __libc_realloc(old, n);
    if (p && !old)
        live++;
    return p;
}

void free(void *p)
{
    if (p)
        live--;
    __libc_free(p);
}
#endif

/* Reads a whole file into a malloc'd buffer; *n gets its size. */
static char *slurp(const char *path, size_t *n)
{
    FILE *f = fopen(path, "rb");
    assert_non_null(f);
    char *buf = NULL;
    size_t cap = 0, len = 0;
    for (;;) {
        if (len + 4096 > cap) {
            cap = 2 * cap + 4096;
            buf = realloc(buf, cap);
            assert_non_null(buf);
        }
        size_t got = fread(buf + len, 1, 4096, f);
        len += got;
        if (got < 4096)
            break;
    }
    fclose(f);
    *n = len;
    return buf;
}

/* Counts records of path: ok and failed; the first error goes to msg. */
static void count_records(const char *path, nd_format fmt, int *ok, int *failed, char *msg)
{
    nd_reader *r;
    nd_error err;
    *ok = *failed = 0;
    msg[0] = '\0';
    assert_int_equal(nd_reader_open(&r, path, fmt, &err), ND_OK);
    nd_molecule m;
    nd_molecule_init(&m);
    int s;
    while ((s = nd_reader_next(r, &m, &err)) != ND_END) {
        if (s == ND_OK)
            (*ok)++;
        else {
            assert_int_equal(s, ND_EINPUT);
            if (!(*failed)++)
                strcpy(msg, err.msg);
        }
    }
    nd_molecule_free(&m);
    nd_reader_close(r);
}

static void test_names(void **state)
{
    (void)state;
    assert_int_equal(nd_format_from_name("XYZ"), ND_FORMAT_XYZ);
    assert_int_equal(nd_format_from_name("sdf"), ND_FORMAT_SDF);
    assert_int_equal(nd_format_from_name("mol"), ND_FORMAT_SDF);
    assert_int_equal(nd_format_from_name("sd"), ND_FORMAT_SDF);
    assert_int_equal(nd_format_from_name("smi"), ND_FORMAT_SMILES);
    assert_int_equal(nd_format_from_name("pdb"), ND_FORMAT_AUTO);
    assert_int_equal(nd_format_from_name(NULL), ND_FORMAT_AUTO);
    assert_int_equal(nd_format_from_path("a/b.c/ligands.SDF"), ND_FORMAT_SDF);
    assert_int_equal(nd_format_from_path("x.smiles"), ND_FORMAT_SMILES);
    assert_int_equal(nd_format_from_path("dir.xyz/noext"), ND_FORMAT_AUTO);
    assert_int_equal(nd_format_from_path(".xyz"), ND_FORMAT_AUTO); /* a hidden file, no extension */
    assert_string_equal(nd_format_name(ND_FORMAT_XYZ), "xyz");
    assert_string_equal(nd_format_name(ND_FORMAT_SDF), "sdf");
    assert_string_equal(nd_format_name(ND_FORMAT_SMILES), "smiles");
}

/* The sample files. Molar masses from the IUPAC 2021 standard atomic
 * weights (C 12.011, H 1.008, N 14.007, O 15.999, Cl 35.45, Br 79.904,
 * F 18.998403162) and AME2020 isotope masses (13C 13.00335483507,
 * 2H 2.01410177812), summed by hand. */
static void test_sample_files(void **state)
{
    (void)state;
    nd_reader *r;
    nd_error err;
    assert_int_equal(nd_reader_open(&r, "tests/data/survey.sdf", ND_FORMAT_AUTO, &err), ND_OK);
    assert_int_equal(nd_reader_format(r), ND_FORMAT_SDF);
    static const struct {
        const char *title, *formula;
        double mass;
        int charge, q_atoms;
    } expect[] = {
        {"fen-001 methanol", "CH4O", 12.011 + 4 * 1.008 + 15.999, 0, 0},
        {"fen-002 acetic acid", "C2H4O2", 2 * 12.011 + 4 * 1.008 + 2 * 15.999, 0, 0},
        {"fen-003 glycine (zwitterion)", "C2H5NO2", 2 * 12.011 + 5 * 1.008 + 14.007 + 2 * 15.999, 0, 2},
        {"fen-004 labelled halomethane", "CHBrClF", 13.00335483507 + 1.008 + 79.904 + 35.45 + 18.998403162, 0, 0},
        {"fen-005 heavy water", "H2O", 2 * 2.01410177812 + 15.999, 0, 0},
        {"fen-006 (E)-but-2-ene", "C4H8", 4 * 12.011 + 8 * 1.008, 0, 0},
    };
    nd_molecule m;
    nd_molecule_init(&m);
    for (int k = 0; k < 6; k++) {
        assert_int_equal(nd_reader_next(r, &m, &err), ND_OK);
        assert_int_equal(nd_reader_record(r), k + 1);
        assert_string_equal(m.title, expect[k].title);
        char f[32];
        nd_molecule_formula(&m, f, sizeof f);
        assert_string_equal(f, expect[k].formula);
        assert_close(nd_molecule_mass(&m), expect[k].mass, 1e-9);
        assert_int_equal(m.charge, expect[k].charge);
        int charged = 0;
        for (int i = 0; i < m.natoms; i++)
            charged += m.formal_charge[i] != 0;
        assert_int_equal(charged, expect[k].q_atoms);
        assert_non_null(nd_molecule_get_data(&m, "collector"));
        if (k == 5) {
            assert_string_equal(nd_molecule_get_data(&m, "site notes"),
                                "headspace over warm peat\nvolatile; stored at -20 C\nthird line of notes");
            assert_int_equal(m.bonds[0].config, ND_DB_TRANS);
        }
        if (k == 3)
            assert_int_not_equal(m.chirality[0], 0); /* CHBrClF: a stereocentre */
    }
    assert_int_equal(nd_reader_next(r, &m, &err), ND_END);
    assert_int_equal(nd_reader_next(r, &m, &err), ND_END);
    long long done, total;
    assert_int_equal(nd_reader_bytes(r, &done, &total), 1);
    struct stat st;
    assert_int_equal(stat("tests/data/survey.sdf", &st), 0);
    assert_true(total == (long long)st.st_size);
    assert_true(done == total); /* every byte read */
    nd_reader_close(r);

    int ok, failed;
    char msg[ND_ERROR_MSG_MAX];
    count_records("tests/data/frames.xyz", ND_FORMAT_AUTO, &ok, &failed, msg);
    assert_int_equal(ok, 4);
    assert_int_equal(failed, 0);
    count_records("tests/data/acetic_acid.mol", ND_FORMAT_AUTO, &ok, &failed, msg);
    assert_int_equal(ok, 1);
    count_records("tests/data/glycine_v3000.sdf", ND_FORMAT_AUTO, &ok, &failed, msg);
    assert_int_equal(ok, 1);

    assert_int_equal(nd_reader_open(&r, "tests/data/glycine_blockcharge.sdf", ND_FORMAT_AUTO, &err), ND_OK);
    assert_int_equal(nd_reader_next(r, &m, &err), ND_OK);
    assert_int_equal(m.formal_charge[0], 1);
    assert_int_equal(m.formal_charge[4], -1);
    nd_reader_close(r);
    nd_molecule_free(&m);
}

/* The content check and sniffing. */
static void test_content_check(void **state)
{
    (void)state;
    size_t n;
    char *sd = slurp("tests/data/survey.sdf", &n);
    nd_reader *r;
    nd_error err;
    assert_int_equal(nd_reader_open_memory(&r, "looks.xyz", sd, n, ND_FORMAT_AUTO, &err), ND_EINPUT);
    assert_null(r);
    assert_contains(err.msg, "looks.xyz: the name says xyz but line 4 is an SD counts line");
    assert_int_equal(nd_reader_open_memory(&r, NULL, sd, n, ND_FORMAT_AUTO, &err), ND_OK);
    assert_int_equal(nd_reader_format(r), ND_FORMAT_SDF);
    nd_reader_close(r);
    /* an explicit format skips the check: the XYZ reader then explains */
    assert_int_equal(nd_reader_open_memory(&r, "looks.xyz", sd, n, ND_FORMAT_XYZ, &err), ND_OK);
    nd_molecule m;
    nd_molecule_init(&m);
    assert_int_equal(nd_reader_next(r, &m, &err), ND_EINPUT);
    assert_contains(err.msg, "looks.xyz, frame 1, line 1: expected the atom count");
    nd_reader_close(r);
    free(sd);

    /* a UTF-8 byte-order mark does not hide the format (no name to go by) */
    const char *bom = "\xef\xbb\xbf" "1\nhelium\nHe 0 0 0\n";
    assert_int_equal(nd_reader_open_memory(&r, NULL, bom, strlen(bom), ND_FORMAT_AUTO, &err), ND_OK);
    assert_int_equal(nd_reader_format(r), ND_FORMAT_XYZ);
    assert_int_equal(nd_reader_next(r, &m, &err), ND_OK);
    assert_int_equal(m.natoms, 1);
    nd_reader_close(r);

    const char *xyz = "1\nhelium\nHe 0 0 0\n";
    assert_int_equal(nd_reader_open_memory(&r, "a.sdf", xyz, strlen(xyz), ND_FORMAT_AUTO, &err), ND_EINPUT);
    assert_contains(err.msg, "a.sdf: the name says sdf but line 1 holds an XYZ atom count alone");
    assert_int_equal(nd_reader_open_memory(&r, "-", xyz, strlen(xyz), ND_FORMAT_AUTO, &err), ND_OK);
    assert_int_equal(nd_reader_format(r), ND_FORMAT_XYZ);
    assert_int_equal(nd_reader_next(r, &m, &err), ND_OK);
    assert_int_equal(m.z[0], 2);
    nd_reader_close(r);

    /* an old molfile without the V2000 tag, whose title looks like SMILES */
    const char *old = "aspirin\n\n\n  1  0\n    0.0000    0.0000    0.0000 C   0  0\nM  END\n";
    assert_int_equal(nd_reader_open_memory(&r, NULL, old, strlen(old), ND_FORMAT_AUTO, &err), ND_OK);
    assert_int_equal(nd_reader_format(r), ND_FORMAT_SDF);
    assert_int_equal(nd_reader_next(r, &m, &err), ND_OK);
    assert_string_equal(m.title, "aspirin");
    nd_reader_close(r);
    const char *smi = "# survey\nCCO ethanol\n";
    assert_int_equal(nd_reader_open_memory(&r, NULL, smi, strlen(smi), ND_FORMAT_AUTO, &err), ND_OK);
    assert_int_equal(nd_reader_format(r), ND_FORMAT_SMILES);
    nd_reader_close(r);
    const char *junk = "{\"not\": \"a molecule\"}\n";
    assert_int_equal(nd_reader_open_memory(&r, NULL, junk, strlen(junk), ND_FORMAT_AUTO, &err), ND_EINPUT);
    assert_contains(err.msg, "cannot tell the format");
    /* a model file given where molecules belong: once read as SMILES, one
     * error per line for thousands of lines */
    const char *model = "nadir-model 1\n{\n \"format\": \"nadir model\"\n";
    assert_int_equal(nd_reader_open_memory(&r, "default.model", model, strlen(model),
                                           ND_FORMAT_AUTO, &err), ND_EINPUT);
    assert_contains(err.msg, "default.model: this is a nadir model file");
    assert_int_equal(nd_reader_open_memory(&r, NULL, "", 0, ND_FORMAT_AUTO, &err), ND_EINPUT);
    assert_contains(err.msg, "empty input");
    /* an empty named file: one "no records" error, then the end */
    assert_int_equal(nd_reader_open_memory(&r, "e.sdf", "", 0, ND_FORMAT_AUTO, &err), ND_OK);
    assert_int_equal(nd_reader_next(r, &m, &err), ND_EINPUT);
    assert_contains(err.msg, "e.sdf, line 1: no sdf records");
    assert_int_equal(nd_reader_next(r, &m, &err), ND_END);
    nd_reader_close(r);
    assert_int_equal(nd_reader_open_memory(&r, "x.xyz", "\n\n", 2, ND_FORMAT_AUTO, &err), ND_OK);
    assert_int_equal(nd_reader_next(r, &m, &err), ND_EINPUT);
    assert_contains(err.msg, "no xyz records");
    nd_reader_close(r);
    assert_int_equal(nd_reader_open_memory(&r, "x.xyz", "1\n", 2, (nd_format)42, &err), ND_EINVAL);
    nd_molecule_free(&m);
}

static void test_open_errors(void **state)
{
    (void)state;
    nd_reader *r;
    nd_error err;
    assert_int_equal(nd_reader_open(&r, "tests/data/no-such-file.sdf", ND_FORMAT_AUTO, &err), ND_EIO);
    assert_null(r);
    assert_contains(err.msg, "cannot open tests/data/no-such-file.sdf");
    assert_int_equal(nd_reader_open(&r, "tests/data", ND_FORMAT_SDF, &err), ND_EIO);
    assert_contains(err.msg, "is a directory");
    assert_int_equal(nd_reader_open(&r, "", ND_FORMAT_AUTO, &err), ND_EINVAL);
    /* binary garbage: a NUL byte is reported as such, with the line */
    static const char bin[] = "\x01\x02\x00\x7f\xff\n\n\n  1  0  0  0  0  0  0  0  0  0999 V2000\n";
    assert_int_equal(nd_reader_open_memory(&r, "g.sdf", bin, sizeof bin - 1, ND_FORMAT_AUTO, &err), ND_OK);
    nd_molecule m;
    nd_molecule_init(&m);
    assert_int_equal(nd_reader_next(r, &m, &err), ND_EINPUT);
    assert_contains(err.msg, "g.sdf, record 1, line 1: line holds a NUL byte");
    assert_int_equal(nd_reader_next(r, &m, &err), ND_END);
    nd_reader_close(r);
    nd_reader_close(NULL);
    nd_molecule_free(&m);
}

/* Lists the entries of dir whose name contains part. */
static int count_entries(const char *dir, const char *part)
{
    DIR *d = opendir(dir);
    assert_non_null(d);
    int n = 0;
    struct dirent *e;
    while ((e = readdir(d)))
        if (strstr(e->d_name, part))
            n++;
    closedir(d);
    return n;
}

/* The writer: temporary name while writing, rename on close, nothing left
 * behind on abort; SD -> XYZ -> SD keeps what XYZ holds. */
static void test_writer(void **state)
{
    (void)state;
    char dir[] = "/tmp/nadir-writer-XXXXXX";
    assert_non_null(mkdtemp(dir));
    char out[256], out2[256], bad[256];
    snprintf(out, sizeof out, "%s/survey.xyz", dir);
    snprintf(out2, sizeof out2, "%s/again.sdf", dir);
    snprintf(bad, sizeof bad, "%s/missing/x.sdf", dir);
    nd_error err;
    nd_reader *r;
    nd_writer *w;
    nd_molecule m;
    nd_molecule_init(&m);
    assert_int_equal(nd_reader_open(&r, "tests/data/survey.sdf", ND_FORMAT_AUTO, &err), ND_OK);
    assert_int_equal(nd_writer_open(&w, out, ND_FORMAT_AUTO, &err), ND_OK);
    struct stat st;
    int k = 0;
    while (nd_reader_next(r, &m, &err) == ND_OK) {
        assert_int_equal(nd_writer_write(w, &m, &err), ND_OK);
        k++;
    }
    assert_int_equal(k, 6);
    assert_int_equal(stat(out, &st), -1); /* not there until closed */
    assert_int_equal(count_entries(dir, ".part-"), 1);
    assert_int_equal(nd_writer_close(w, &err), ND_OK);
    assert_int_equal(stat(out, &st), 0);
    assert_int_equal(count_entries(dir, ".part-"), 0);
    nd_reader_close(r);

    /* back to SD: elements and coordinates (to 4 decimals) and titles survive */
    assert_int_equal(nd_reader_open(&r, out, ND_FORMAT_AUTO, &err), ND_OK);
    assert_int_equal(nd_writer_open(&w, out2, ND_FORMAT_AUTO, &err), ND_OK);
    while (nd_reader_next(r, &m, &err) == ND_OK)
        assert_int_equal(nd_writer_write(w, &m, &err), ND_OK);
    assert_int_equal(nd_writer_close(w, &err), ND_OK);
    nd_reader_close(r);
    nd_reader *a, *b;
    nd_molecule m2;
    nd_molecule_init(&m2);
    assert_int_equal(nd_reader_open(&a, "tests/data/survey.sdf", ND_FORMAT_AUTO, &err), ND_OK);
    assert_int_equal(nd_reader_open(&b, out2, ND_FORMAT_AUTO, &err), ND_OK);
    for (int rec = 0; rec < 6; rec++) {
        assert_int_equal(nd_reader_next(a, &m, &err), ND_OK);
        assert_int_equal(nd_reader_next(b, &m2, &err), ND_OK);
        assert_string_equal(m.title, m2.title);
        assert_int_equal(m.natoms, m2.natoms);
        for (int i = 0; i < m.natoms; i++) {
            assert_int_equal(m.z[i], m2.z[i]);
            for (int c = 0; c < 3; c++)
                assert_true(m.xyz[3 * i + c] == m2.xyz[3 * i + c]); /* 4-decimal values are exact in XYZ */
        }
        assert_int_equal(m2.nbonds, 0); /* XYZ has no bonds */
        assert_int_equal(m2.ndata, 0);  /* nor data items */
    }
    nd_reader_close(a);
    nd_reader_close(b);
    nd_molecule_free(&m2);

    /* abort: nothing left */
    assert_int_equal(nd_writer_open(&w, out, ND_FORMAT_SDF, &err), ND_OK);
    assert_int_equal(nd_writer_write(w, &m, &err), ND_OK);
    nd_writer_abort(w);
    nd_writer_abort(NULL);
    assert_int_equal(count_entries(dir, ".part-"), 0);
    assert_int_equal(nd_writer_open(&w, bad, ND_FORMAT_AUTO, &err), ND_EIO);
    assert_contains(err.msg, "cannot create a file beside");
    assert_int_equal(nd_writer_open(&w, "out.unknown", ND_FORMAT_AUTO, &err), ND_EINVAL);
    assert_contains(err.msg, "cannot tell the output format");
    assert_int_equal(nd_writer_open(&w, "-", ND_FORMAT_AUTO, &err), ND_EINVAL);
    assert_int_equal(nd_writer_open(&w, "", ND_FORMAT_XYZ, &err), ND_EINVAL);
    /* a record the format cannot hold: the error names the output (the caller
     * adds where the record came from: it is not in the output) */
    assert_int_equal(nd_writer_open(&w, out, ND_FORMAT_XYZ, &err), ND_OK);
    m.dimension = 0;
    assert_int_equal(nd_writer_write(w, &m, &err), ND_EINPUT);
    assert_contains(err.msg, "cannot write to ");
    assert_contains(err.msg, "survey.xyz: molecule");
    nd_writer_abort(w);
    nd_molecule_free(&m);
    unlink(out);
    unlink(out2);
    assert_int_equal(rmdir(dir), 0);
}

/* SMILES files: blank and '#' lines skipped, the name after the SMILES,
 * errors carrying file, record, line and the parser's column. */
static void test_smiles_file(void **state)
{
    (void)state;
    const char *txt = "# fen survey\n\nC1CC unclosed ring\n  O   water, the solvent  \n";
    nd_reader *r;
    nd_error err;
    assert_int_equal(nd_reader_open_memory(&r, "t.smi", txt, strlen(txt), ND_FORMAT_AUTO, &err), ND_OK);
    nd_molecule m;
    nd_molecule_init(&m);
    assert_int_equal(nd_reader_next(r, &m, &err), ND_EINPUT);
    assert_contains(err.msg, "t.smi, record 1, line 3: ");
    assert_contains(err.msg, "ring bond"); /* the SMILES parser's own words follow */
    assert_int_equal(nd_reader_next(r, &m, &err), ND_OK);
    assert_int_equal(nd_reader_record(r), 2);
    assert_string_equal(m.title, "water, the solvent");
    assert_int_equal(m.z[0], 8);
    assert_int_equal(m.natoms, 3); /* hydrogens made explicit */
    assert_int_equal(nd_reader_next(r, &m, &err), ND_END);
    nd_reader_close(r);
    const char *bad = "  C1CC  off by two\n";
    assert_int_equal(nd_reader_open_memory(&r, "u.smi", bad, strlen(bad), ND_FORMAT_AUTO, &err), ND_OK);
    assert_int_equal(nd_reader_next(r, &m, &err), ND_EINPUT);
    assert_contains(err.msg, "u.smi, record 1, line 1: (word starts at column 3): SMILES column");
    nd_reader_close(r);
    nd_molecule_free(&m);
}

/* SD stereo read from 3D coordinates, written as SMILES and parsed back,
 * keeps its signs: the SD reader and the SMILES module share molecule.h's
 * signed-volume convention (an internal consistency check). */
static void test_stereo_through_smiles(void **state)
{
    (void)state;
    nd_reader *r;
    nd_error err;
    char path[] = "/tmp/nadir-stereo-XXXXXX.smi";
    int fd = mkstemps(path, 4);
    assert_true(fd >= 0);
    close(fd);
    nd_writer *w;
    assert_int_equal(nd_writer_open(&w, path, ND_FORMAT_AUTO, &err), ND_OK);
    assert_int_equal(nd_reader_open(&r, "tests/data/survey.sdf", ND_FORMAT_AUTO, &err), ND_OK);
    nd_molecule m, back;
    nd_molecule_init(&m);
    nd_molecule_init(&back);
    int chir[6] = {0}, conf[6] = {0};
    for (int k = 0; k < 6; k++) {
        assert_int_equal(nd_reader_next(r, &m, &err), ND_OK);
        chir[k] = m.chirality[0];
        conf[k] = m.bonds[0].config;
        assert_int_equal(nd_writer_write(w, &m, &err), ND_OK);
    }
    nd_reader_close(r);
    assert_int_equal(nd_writer_close(w, &err), ND_OK);
    assert_int_not_equal(chir[3], 0);
    assert_int_equal(conf[5], ND_DB_TRANS);
    assert_int_equal(nd_reader_open(&r, path, ND_FORMAT_AUTO, &err), ND_OK);
    for (int k = 0; k < 6; k++) {
        int s = nd_reader_next(r, &back, &err);
        if (s != ND_OK)
            print_error("%s\n", err.msg);
        assert_int_equal(s, ND_OK);
        assert_int_equal(back.chirality[0], chir[k]);
        if (k == 5)
            assert_int_equal(back.bonds[0].config, ND_DB_TRANS);
    }
    nd_reader_close(r);
    nd_molecule_free(&m);
    nd_molecule_free(&back);
    unlink(path);
}

/* What the fuzzers check for every record read: writing it as XYZ and as
 * SD (when the format can hold it) and reading that back gives the same
 * atoms and title. */
static void cross_write(const nd_molecule *m)
{
    for (int k = 0; k < 2; k++) {
        nd_format f = k ? ND_FORMAT_SDF : ND_FORMAT_XYZ;
        nd_writer *w;
        char path[] = "/tmp/nadir-cross-XXXXXX";
        int fd = mkstemp(path);
        assert_true(fd >= 0);
        close(fd);
        assert_int_equal(nd_writer_open(&w, path, f, NULL), ND_OK);
        if (nd_writer_write(w, m, NULL) != ND_OK) { /* a record the format cannot hold */
            nd_writer_abort(w);
            unlink(path);
            continue;
        }
        assert_int_equal(nd_writer_close(w, NULL), ND_OK);
        nd_reader *r;
        nd_error err;
        assert_int_equal(nd_reader_open(&r, path, f, &err), ND_OK);
        nd_molecule b;
        nd_molecule_init(&b);
        int s = nd_reader_next(r, &b, &err);
        if (s != ND_OK)
            print_error("%s\n", err.msg);
        assert_int_equal(s, ND_OK);
        assert_int_equal(b.natoms, m->natoms);
        assert_string_equal(b.title ? b.title : "", m->title ? m->title : "");
        nd_molecule_free(&b);
        nd_reader_close(r);
        unlink(path);
    }
}

/* Crashing inputs found by the fuzzers, kept in tests/fuzz/regressions/,
 * and the malformed corpus: each must read to the end without a crash or a
 * sanitizer report (record errors are expected). */
static void test_fuzz_regressions(void **state)
{
    (void)state;
    static const char *dirs[] = {"tests/fuzz/regressions", "tests/data/malformed"};
    int files = 0;
    for (size_t di = 0; di < 2; di++) {
    DIR *d = opendir(dirs[di]);
    assert_non_null(d);
    struct dirent *e;
    while ((e = readdir(d))) {
        if (e->d_name[0] == '.')
            continue;
        char path[512];
        snprintf(path, sizeof path, "%s/%s", dirs[di], e->d_name);
        size_t n;
        char *buf = slurp(path, &n);
        nd_format f = strncmp(e->d_name, "xyz", 3) == 0 ? ND_FORMAT_XYZ
                      : strstr(e->d_name, ".xyz") ? ND_FORMAT_XYZ : ND_FORMAT_SDF;
        nd_reader *r;
        nd_error err;
        assert_int_equal(nd_reader_open_memory(&r, e->d_name, buf, n, f, &err), ND_OK);
        nd_molecule m;
        nd_molecule_init(&m);
        int s, guard = 0;
        while ((s = nd_reader_next(r, &m, &err)) == ND_OK || s == ND_EINPUT) {
            assert_true(++guard < 1000000);
            if (s == ND_OK)
                cross_write(&m);
            else
                assert_contains(err.msg, "line ");
        }
        assert_true(s == ND_END || s == ND_EIO);
        nd_molecule_free(&m);
        nd_reader_close(r);
        free(buf);
        files++;
    }
    closedir(d);
    }
    assert_true(files >= 20); /* the malformed corpus alone has more */
}

/* Fails each allocation in turn while a multi-record SD file and an XYZ
 * file are read: every failure is ND_ENOMEM (or a clean record error),
 * never a crash, and nothing leaks. */
#if ND_FAULTS
static void test_fault_injection(void **state)
{
    (void)state;
    static const char *files[] = {"tests/data/survey.sdf", "tests/data/frames.xyz",
                                  "tests/data/glycine_v3000.sdf"};
    for (size_t fi = 0; fi < sizeof files / sizeof files[0]; fi++) {
        size_t n;
        char *buf = slurp(files[fi], &n);
        int finished = 0, failures = 0;
        for (long k = 0; !finished && k < 100000; k++) {
            long before = live;
            fault_hits = 0;
            fault_countdown = k;
            nd_reader *r = NULL;
            nd_error err;
            nd_molecule m;
            nd_molecule_init(&m);
            int s = nd_reader_open_memory(&r, files[fi], buf, n, ND_FORMAT_AUTO, &err);
            if (s == ND_OK) {
                while ((s = nd_reader_next(r, &m, &err)) == ND_OK || s == ND_EINPUT)
                    ;
            }
            if (s != ND_END)
                assert_int_equal(s, ND_ENOMEM);
            nd_molecule_free(&m);
            nd_reader_close(r);
            fault_countdown = -1;
            assert_int_equal(live, before); /* nothing leaked on any path */
            if (fault_hits == 0)
                finished = 1;
            else
                failures++;
        }
        assert_true(finished);
        assert_true(failures > 10);
        free(buf);
    }
}
#endif

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_names),         cmocka_unit_test(test_sample_files),
        cmocka_unit_test(test_content_check), cmocka_unit_test(test_open_errors),
        cmocka_unit_test(test_writer),        cmocka_unit_test(test_smiles_file),
        cmocka_unit_test(test_stereo_through_smiles),
        cmocka_unit_test(test_fuzz_regressions),
#if ND_FAULTS /* AddressSanitizer owns malloc: the plain build runs this one */
        cmocka_unit_test(test_fault_injection),
#endif
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
