/* The JSON Lines dataset: round trips, unit conversion, bad lines with their
 * line numbers, interrupted writes, and the binary cache. */
#include "tests/lib/testutil.h"

#include "core/units.h"
#include "potential/dataset.h"

#include <fcntl.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <time.h>
#include <unistd.h>

static char dir[256];

static int make_dir(void **state)
{
    (void)state;
    const char *t = getenv("TMPDIR");
    snprintf(dir, sizeof dir, "%s/nadir-dataset-XXXXXX", t ? t : "/tmp");
    return mkdtemp(dir) ? 0 : -1;
}

static int remove_dir(void **state)
{
    (void)state;
    char cmd[300];
    snprintf(cmd, sizeof cmd, "rm -rf '%s'", dir);
    return system(cmd) == 0 ? 0 : -1;
}

/* Path of a file in the test directory (static storage, one at a time). */
static const char *in_dir(const char *name)
{
    static char p[400];
    snprintf(p, sizeof p, "%s/%s", dir, name);
    return p;
}

static void write_file(const char *path, const char *text)
{
    FILE *f = fopen(path, "w");
    assert_non_null(f);
    fputs(text, f);
    fclose(f);
}

static long file_size(const char *path)
{
    struct stat st;
    return stat(path, &st) == 0 ? (long)st.st_size : -1;
}

/* Writer then reader give back the same bits, keys, sources and ids. */
static void test_round_trip(void **state)
{
    (void)state;
    const char *path = in_dir("rt.jsonl");
    int z1[3] = {8, 1, 1};
    double x1[9] = {0.0, 0.0, 0.1173, 0.0, 0.7572, -0.4692, 0.0, -0.7572, -0.4692};
    double f1[9] = {0.1, -0.2, 1.0 / 3.0, 2.5e-9, -7.0, 0.0, -0.1, 7.2, -1.0 / 3.0};
    int z2[2] = {17, 1};
    double x2[6] = {0.0, 0.0, 0.0, 1.2745, 1e-300, -0.0};
    nd_dataset_writer *w;
    nd_error err;
    long dropped = -1;
    assert_int_equal(nd_dataset_writer_open(&w, path, &dropped, &err), ND_OK);
    assert_int_equal(dropped, 0);
    nd_dataset_entry a = {3, z1, x1, -3181.602398765432, f1, 0, 1, "water", "unit test", "eq", 0};
    a.id = nd_dataset_hash(3, z1, x1, 0, 1);
    nd_dataset_entry b = {2, z2, x2, -289.0625, NULL, 0, 1, "hydrogen \"chloride\"", NULL, NULL, 0};
    b.id = nd_dataset_hash(2, z2, x2, 0, 1);
    nd_dataset_entry c = a;
    c.charge = 1;
    c.multiplicity = 2;
    c.id = nd_dataset_hash(3, z1, x1, 1, 2);
    assert_int_equal(nd_dataset_writer_append(w, &a, &err), ND_OK);
    assert_int_equal(nd_dataset_writer_append(w, &b, &err), ND_OK);
    assert_int_equal(nd_dataset_writer_append(w, &c, &err), ND_OK);
    assert_int_equal(nd_dataset_writer_close(w, &err), ND_OK);

    nd_dataset *d;
    nd_dataset_report rep;
    assert_int_equal(nd_dataset_load(&d, path, 0, &rep, &err), ND_OK);
    assert_int_equal(nd_dataset_count(d), 3);
    assert_int_equal(nd_dataset_atoms(d), 8);
    assert_int_equal(rep.lines, 4); /* header + 3 */
    assert_int_equal(nd_dataset_key_count(d), 2);
    assert_int_equal(nd_dataset_key_index(d, 2), 0);
    assert_string_equal(nd_dataset_key_name(d, 1), "hydrogen \"chloride\"");
    nd_dataset_entry e;
    nd_dataset_get(d, 0, &e);
    assert_int_equal(e.natoms, 3);
    assert_true(e.energy == a.energy);
    for (int i = 0; i < 9; i++) {
        assert_true(e.xyz[i] == x1[i]);
        assert_true(e.forces[i] == f1[i]);
    }
    assert_string_equal(e.source, "unit test");
    assert_string_equal(e.tag, "eq");
    assert_true(e.id == a.id);
    nd_dataset_get(d, 1, &e);
    assert_null(e.forces);
    assert_null(e.source);
    assert_int_equal(e.z[0], 17);
    assert_true(e.xyz[4] == 1e-300);
    nd_dataset_get(d, 2, &e);
    assert_int_equal(e.charge, 1);
    assert_int_equal(e.multiplicity, 2);
    assert_true(nd_dataset_has_id(d, a.id));
    assert_true(nd_dataset_has_id(d, c.id));
    assert_false(a.id == c.id);
    assert_false(nd_dataset_has_id(d, a.id ^ 1));
    nd_dataset_free(d);
}

/* Declared units are converted: a hartree/bohr header, a per-line eV
 * override, nested coordinate triples. Conversion factors from CODATA 2018
 * through core/units.h; the eV/hartree ratio is checked against CODATA
 * 2018's own listed value, E_h = 27.211386245988 eV. */
static void test_units(void **state)
{
    (void)state;
    const char *path = in_dir("units.jsonl");
    write_file(path,
               "{\"dataset\": \"nadir\", \"version\": 1, \"energy_unit\": \"hartree\", \"length_unit\": \"bohr\"}\n"
               "{\"key\": \"h2\", \"elements\": [\"H\", \"H\"], \"coordinates\": [[0, 0, 0], [0, 0, 1.4011]],"
               " \"energy\": -1.1745, \"forces\": [0, 0, 0.0125, 0, 0, -0.0125]}\n"
               "\n"
               "{\"key\": \"h2\", \"elements\": [\"H\", \"H\"], \"coordinates\": [0, 0, 0, 0, 0, 0.7414],"
               " \"energy\": -31.96, \"forces\": [0, 0, 0.5, 0, 0, -0.5], \"energy_unit\": \"eV\","
               " \"length_unit\": \"angstrom\"}\n"
               "{\"key\": \"h2\", \"elements\": [\"H\", \"H\"], \"coordinates\": [0, 0, 0, 0, 0, 1.4],"
               " \"energy\": -3083.0, \"energy_unit\": \"kJ/mol\"}\n");
    nd_dataset *d;
    nd_error err;
    assert_int_equal(nd_dataset_load(&d, path, 0, NULL, &err), ND_OK);
    assert_int_equal(nd_dataset_count(d), 3);
    nd_dataset_entry e;
    nd_dataset_get(d, 0, &e);
    assert_close(e.xyz[5], 1.4011 * 0.529177210903, 1e-12);   /* CODATA 2018 bohr */
    assert_close(e.energy, -1.1745 * ND_HARTREE_KCALMOL, 1e-9);
    assert_close(e.forces[2], 0.0125 * ND_HARTREE_KCALMOL / 0.529177210903, 1e-9);
    nd_dataset_get(d, 1, &e);
    assert_close(e.xyz[5], 0.7414, 1e-15);
    assert_close(e.energy, -31.96 * ND_EV_KCALMOL, 1e-9);
    assert_close(e.forces[5], -0.5 * ND_EV_KCALMOL, 1e-12);
    nd_dataset_get(d, 2, &e);
    assert_close(e.energy, -3083.0 / 4.184, 1e-9); /* thermochemical calorie, 4.184 J exactly */
    assert_null(e.forces);
    assert_close(e.xyz[5], 1.4 * 0.529177210903, 1e-12);       /* header length unit still bohr */
    assert_rel_close(ND_HARTREE_KCALMOL / ND_EV_KCALMOL, 27.211386245988, 1e-12, 0);
    assert_rel_close(ND_HARTREE_KCALMOL, 627.509474, 1e-9, 0); /* from memory, cross-check only */
    nd_dataset_free(d);
}

/* Each kind of bad line is reported with its line number and reason; fatal
 * by default, counted and skipped with ND_DATASET_SKIP_BAD. */
static void test_bad_lines(void **state)
{
    (void)state;
    static const struct {
        const char *line, *reason;
    } cases[] = {
        {"{\"key\": \"m\", \"elements\": [\"H\"], \"coordinates\": [0, 0, NaN], \"energy\": 1}", "not valid JSON"},
        {"{\"key\": \"m\", \"elements\": [\"H\", \"H\"], \"coordinates\": [0, 0, 0, 1], \"energy\": 1}", "has 4 numbers for 2 elements"},
        {"{\"key\": \"m\", \"elements\": [\"H\", \"Qx\"], \"coordinates\": [0, 0, 0, 1, 0, 0], \"energy\": 1}", "atom 2: unknown element 'Qx'"},
        {"{\"key\": \"m\", \"elements\": [\"H\"], \"coordinates\": [0, 0, 0]}", "missing \"energy\""},
        {"{\"key\": \"m\", \"elements\": [\"H\"], \"coordinates\": [0, 0, 0], \"energy\": 1e999}", "not a finite number"},
        {"{\"elements\": [\"H\"], \"coordinates\": [0, 0, 0], \"energy\": 1}", "missing \"key\""},
        {"{\"key\": \"m\", \"elements\": [\"H\"], \"coordinates\": [0, 0, 0], \"energy\": 1, \"energy_unit\": \"Ry\"}", "unknown energy_unit"},
        {"{\"key\": \"m\", \"elements\": [\"H\"], \"coordinates\": [0, 0, 0], \"energy\": 1, \"forces\": [1, 2]}", "\"forces\" has 2 numbers"},
        {"[1, 2, 3]", "not a JSON object"},
    };
    const char *good = "{\"key\": \"m\", \"elements\": [\"H\"], \"coordinates\": [0, 0, 0], \"energy\": 1}\n";
    const char *path = in_dir("bad.jsonl");
    for (size_t c = 0; c < sizeof cases / sizeof cases[0]; c++) {
        char text[2048];
        snprintf(text, sizeof text, "%s%s%s\n%s", good, good, cases[c].line, good);
        write_file(path, text);
        nd_dataset *d = NULL;
        nd_error err;
        nd_dataset_report rep;
        assert_int_equal(nd_dataset_load(&d, path, 0, &rep, &err), ND_EINPUT);
        assert_null(d);
        assert_contains(err.msg, "bad.jsonl, line 3: ");
        assert_contains(err.msg, cases[c].reason);
        assert_int_equal(nd_dataset_load(&d, path, ND_DATASET_SKIP_BAD, &rep, &err), ND_OK);
        assert_int_equal(nd_dataset_count(d), 3);
        assert_int_equal(rep.bad_lines, 1);
        assert_int_equal(rep.first_bad_line, 3);
        assert_contains(rep.first_bad, cases[c].reason);
        nd_dataset_free(d);
    }
    /* A bad header is always fatal: its units would apply to every line. */
    write_file(path, "{\"dataset\": \"nadir\", \"energy_unit\": \"furlong\"}\n");
    nd_dataset *d = NULL;
    nd_error err;
    assert_int_equal(nd_dataset_load(&d, path, ND_DATASET_SKIP_BAD, NULL, &err), ND_EINPUT);
    assert_contains(err.msg, "line 1: unknown energy_unit");
    write_file(path, "{\"dataset\": \"nadir\", \"version\": 2}\n");
    assert_int_equal(nd_dataset_load(&d, path, ND_DATASET_SKIP_BAD, NULL, &err), ND_EINPUT);
    assert_contains(err.msg, "line 1: dataset version other than 1 is not understood");
    assert_int_equal(nd_dataset_load(&d, in_dir("does-not-exist.jsonl"), 0, NULL, &err), ND_EIO);
}

/* A partial last line (a killed writer) is ignored by the reader and cut
 * off by the next writer, whose lines then follow whole ones. */
static void test_interrupted_tail(void **state)
{
    (void)state;
    const char *path = in_dir("tail.jsonl");
    const char *good = "{\"key\": \"m\", \"elements\": [\"H\"], \"coordinates\": [0, 0, 0], \"energy\": 1}\n";
    char text[1024];
    snprintf(text, sizeof text, "%s{\"key\": \"m\", \"elements\": [\"H\"], \"coordin", good);
    write_file(path, text);
    nd_dataset *d;
    nd_error err;
    nd_dataset_report rep;
    assert_int_equal(nd_dataset_load(&d, path, 0, &rep, &err), ND_OK);
    assert_int_equal(nd_dataset_count(d), 1);
    assert_int_equal(rep.truncated_tail, 1);
    nd_dataset_free(d);

    nd_dataset_writer *w;
    long dropped = 0;
    assert_int_equal(nd_dataset_writer_open(&w, path, &dropped, &err), ND_OK);
    assert_int_equal(dropped, (long)strlen(text) - (long)strlen(good));
    int z = 1;
    double x[3] = {0.25, 0.5, 0.75};
    nd_dataset_entry e = {1, &z, x, 2.5, NULL, 0, 1, "m", NULL, NULL, 7};
    assert_int_equal(nd_dataset_writer_append(w, &e, &err), ND_OK);
    /* Non-finite numbers are refused and nothing is written. */
    long before = file_size(path);
    e.energy = NAN;
    assert_int_equal(nd_dataset_writer_append(w, &e, &err), ND_EINPUT);
    assert_contains(err.msg, "energy is not finite");
    assert_int_equal(file_size(path), before);
    assert_int_equal(nd_dataset_writer_close(w, &err), ND_OK);
    assert_int_equal(nd_dataset_load(&d, path, 0, &rep, &err), ND_OK);
    assert_int_equal(nd_dataset_count(d), 2);
    assert_int_equal(rep.truncated_tail, 0);
    assert_true(nd_dataset_has_id(d, 7));
    nd_dataset_free(d);
    nd_dataset_writer_close(NULL, NULL);
    nd_dataset_free(NULL);
}

/* The writer refuses to append kcal/mol lines under a header in hartree. */
static void test_writer_refuses_other_units(void **state)
{
    (void)state;
    const char *path = in_dir("hartree.jsonl");
    write_file(path, "{\"dataset\": \"nadir\", \"energy_unit\": \"hartree\", \"length_unit\": \"bohr\"}\n");
    nd_dataset_writer *w = NULL;
    nd_error err;
    assert_int_equal(nd_dataset_writer_open(&w, path, NULL, &err), ND_EINPUT);
    assert_null(w);
    assert_contains(err.msg, "units other than kcal/mol");
}

/* The writer never appends to (or cuts the tail of) a file that is not a
 * dataset: text that does not start with a JSON object, or binary bytes. */
static void test_writer_refuses_non_dataset(void **state)
{
    (void)state;
    static const char *texts[] = {"CCO ethanol\nlast line without newline", "\n\n  title\n",
                                  "{\0binary"};
    static const size_t lens[] = {0, 0, 8};
    for (int k = 0; k < 3; k++) {
        const char *path = in_dir("notes.txt");
        size_t n = lens[k] ? lens[k] : strlen(texts[k]);
        FILE *f = fopen(path, "wb");
        assert_non_null(f);
        assert_int_equal(fwrite(texts[k], 1, n, f), n);
        fclose(f);
        nd_dataset_writer *w = NULL;
        nd_error err;
        assert_int_equal(nd_dataset_writer_open(&w, path, NULL, &err), ND_EINPUT);
        assert_null(w);
        assert_contains(err.msg, "not a dataset");
        assert_int_equal(file_size(path), (long)n);
    }
}

/* The binary cache is used only while the file is unchanged, and gives the
 * same structures as the text. */
static void test_cache(void **state)
{
    (void)state;
    const char *path = in_dir("cached.jsonl");
    char text[8192] = "";
    for (int i = 0; i < 20; i++) {
        char line[300];
        snprintf(line, sizeof line,
                 "{\"key\": \"k%d\", \"elements\": [\"C\", \"O\"], \"coordinates\": [0, 0, 0, 0, 0, %.4f],"
                 " \"energy\": %.3f%s, \"tag\": \"t%d\"}\n",
                 i % 3, 1.1 + 0.01 * i, -70.0 - i, i % 2 ? ", \"forces\": [0, 0, 1, 0, 0, -1]" : "", i % 2);
        strcat(text, line);
    }
    write_file(path, text);
    nd_dataset *d1, *d2;
    nd_error err;
    nd_dataset_report r1, r2;
    assert_int_equal(nd_dataset_load(&d1, path, ND_DATASET_CACHE, &r1, &err), ND_OK);
    assert_int_equal(r1.cache_used, 0);
    assert_int_equal(r1.cache_written, 1);
    char cpath[500];
    snprintf(cpath, sizeof cpath, "%s.cache", path);
    assert_true(file_size(cpath) > 0);
    assert_int_equal(nd_dataset_load(&d2, path, ND_DATASET_CACHE, &r2, &err), ND_OK);
    assert_int_equal(r2.cache_used, 1);
    assert_int_equal(r2.lines, 20);
    assert_int_equal(nd_dataset_count(d2), 20);
    assert_int_equal(nd_dataset_key_count(d2), 3);
    for (long i = 0; i < 20; i++) {
        nd_dataset_entry a, b;
        nd_dataset_get(d1, i, &a);
        nd_dataset_get(d2, i, &b);
        assert_int_equal(a.natoms, b.natoms);
        assert_true(a.energy == b.energy && a.id == b.id);
        assert_true((a.forces == NULL) == (b.forces == NULL));
        assert_true(a.xyz[5] == b.xyz[5]);
        assert_string_equal(a.key, b.key);
        assert_string_equal(a.tag, b.tag);
        assert_int_equal(nd_dataset_key_index(d1, i), nd_dataset_key_index(d2, i));
    }
    nd_dataset_free(d1);
    nd_dataset_free(d2);

    /* Same size, different content, same mtime forced: the hash catches it. */
    struct stat st;
    assert_int_equal(stat(path, &st), 0);
    char *swap = strstr(text, "-70.000");
    assert_non_null(swap);
    swap[1] = '8';
    write_file(path, text);
    struct timespec ts[2] = {st.st_atim, st.st_mtim};
    assert_int_equal(utimensat(AT_FDCWD, path, ts, 0), 0);
    assert_int_equal(nd_dataset_load(&d1, path, ND_DATASET_CACHE, &r1, &err), ND_OK);
    assert_int_equal(r1.cache_used, 0);
    nd_dataset_entry e;
    nd_dataset_get(d1, 0, &e);
    assert_close(e.energy, -80.0, 1e-12);
    nd_dataset_free(d1);

    /* A damaged cache is ignored, not trusted. */
    FILE *f = fopen(cpath, "r+b");
    assert_non_null(f);
    fseek(f, 120, SEEK_SET);
    fputs("garbage garbage garbage", f);
    fclose(f);
    assert_int_equal(nd_dataset_load(&d1, path, ND_DATASET_CACHE, &r1, &err), ND_OK);
    nd_dataset_get(d1, 0, &e);
    assert_close(e.energy, -80.0, 1e-12);
    assert_int_equal(nd_dataset_count(d1), 20);
    nd_dataset_free(d1);
}

/* The structure hash: -0.0 equals 0.0; any change of atoms, coordinates,
 * charge or multiplicity changes it. */
static void test_hash(void **state)
{
    (void)state;
    int z[2] = {6, 8};
    double x[6] = {0.0, 0.0, 0.0, 0.0, 0.0, 1.128};
    double y[6] = {-0.0, 0.0, 0.0, 0.0, 0.0, 1.128};
    uint64_t h = nd_dataset_hash(2, z, x, 0, 1);
    assert_true(h == nd_dataset_hash(2, z, y, 0, 1));
    assert_false(h == nd_dataset_hash(2, z, x, 1, 1));
    assert_false(h == nd_dataset_hash(2, z, x, 0, 3));
    y[5] = nextafter(1.128, 2.0);
    assert_false(h == nd_dataset_hash(2, z, y, 0, 1));
    int z2[2] = {8, 6};
    assert_false(h == nd_dataset_hash(2, z2, x, 0, 1));
    char buf[17];
    nd_dataset_format_id(0x0123456789abcdefULL, buf);
    assert_string_equal(buf, "0123456789abcdef");
}

/* Seeded round trip of number text: every way of writing a number that
 * JSON allows reads back as exactly what strtod (the C library's correctly
 * rounded conversion) makes of the same text. */
static void test_number_text(void **state)
{
    (void)state;
    const char *path = in_dir("numbers.jsonl");
    FILE *f = fopen(path, "w");
    assert_non_null(f);
    static const char *formats[] = {"%.17g", "%.15g", "%.16g", "%.6e", "%.3f", "%.0f", "%.20e", "%g"};
    static const char *fixed[] = {"0", "-0", "1E+2", "0.5e-3", "123456789012345678901234567890",
                                  "9007199254740993", "2.2250738585072014e-308", "4.9e-324",
                                  "1.7976931348623157e308", "0.1", "-1.5E-10", "1e22", "1e23",
                                  "8.98846567431158e307", "0.000000000000000000000000001"};
    char texts[400][48];
    int nt = 0;
    for (size_t i = 0; i < sizeof fixed / sizeof fixed[0]; i++)
        snprintf(texts[nt++], sizeof texts[0], "%s", fixed[i]);
    uint64_t x = 0x9e3779b97f4a7c15ULL;
    while (nt < 399) {
        x ^= x << 13;
        x ^= x >> 7;
        x ^= x << 17;
        double mag = (double)(x >> 11) * 0x1.0p-53;               /* [0, 1) */
        int e = (int)((x >> 3) % 40) - 20;
        double v = (x & 1 ? -1.0 : 1.0) * mag * pow(10.0, e);
        snprintf(texts[nt], sizeof texts[0], formats[(x >> 8) % 8], v);
        nt++;
    }
    /* One structure per number: the number is the energy and the first
     * coordinate. */
    for (int i = 0; i < nt; i++)
        fprintf(f, "{\"key\": \"n\", \"elements\": [\"H\"], \"coordinates\": [%s, 0, 0], \"energy\": %s}\n",
                texts[i], texts[i]);
    fclose(f);
    nd_dataset *d;
    nd_error err;
    assert_int_equal(nd_dataset_load(&d, path, 0, NULL, &err), ND_OK);
    assert_int_equal(nd_dataset_count(d), nt);
    for (int i = 0; i < nt; i++) {
        nd_dataset_entry e;
        nd_dataset_get(d, i, &e);
        double want = strtod(texts[i], NULL);
        if (!(e.energy == want && signbit(e.energy) == signbit(want) && e.xyz[0] == want)) {
            print_error("text '%s': read %.17g, strtod %.17g\n", texts[i], e.energy, want);
            fail();
        }
    }
    nd_dataset_free(d);
}

/* JSON details: escapes in strings (including a surrogate pair), members
 * the reader does not know (skipped whatever they hold), and syntax errors
 * with their column. */
static void test_json_details(void **state)
{
    (void)state;
    const char *path = in_dir("json.jsonl");
    write_file(path,
               "{\"extra\": {\"a\": [1, {\"b\": null}], \"c\": true, \"d\": false}, \"key\": \"caf\\u00e9 \\\"x\\\" \\ud83d\\ude00\\t\","
               " \"elements\": [\"N\"], \"coordinates\": [[0.5, -0.25, 1e-3]], \"energy\": -1E2,"
               " \"forces\": null, \"source\": null, \"id\": \"00000000000000ff\"}\n");
    nd_dataset *d;
    nd_error err;
    assert_int_equal(nd_dataset_load(&d, path, 0, NULL, &err), ND_OK);
    nd_dataset_entry e;
    nd_dataset_get(d, 0, &e);
    assert_string_equal(e.key, "caf\xc3\xa9 \"x\" \xf0\x9f\x98\x80\t");
    assert_null(e.forces);
    assert_null(e.source);
    assert_true(e.id == 0xff);
    assert_true(e.xyz[2] == 1e-3 && e.energy == -100.0);
    nd_dataset_free(d);
    static const struct {
        const char *line, *msg;
    } bad[] = {
        {"{\"key\": \"m\", \"elements\": [\"H\"], \"coordinates\": [0, 0, 0], \"energy\": 1} x", "column 72: text after the object"},
        {"{\"key\": \"m\" \"elements\": [\"H\"]}", "column 13: expected ',' or '}'"},
        {"{\"key\": \"m\\q\", \"elements\": [\"H\"]}", "bad escape in a string"},
        {"{\"key\": \"m\", \"elements\": [\"H\"], \"coordinates\": [0, 0, 01], \"energy\": 1}", "expected ',' or ']'"},
        {"{\"key\": \"m\", \"elements\": [\"H\"], \"coordinates\": [0, 0, .5], \"energy\": 1}", "value 3 (atom 1): not a number"},
        {"{\"key\": \"m\", \"elements\": [\"H\"], \"coordinates\": [[0, 0]], \"energy\": 1}", "entry 1 is not three numbers"},
        {"{\"key\": \"m\", \"elements\": [\"H\"], \"coordinates\": [0, 0, 0], \"energy\": 1, \"charge\": 0.5}", "\"charge\" is not an integer"},
        {"{\"key\": 7, \"elements\": [\"H\"], \"coordinates\": [0, 0, 0], \"energy\": 1}", "\"key\" is not a non-empty string"},
        {"{\"key\": \"m\", \"elements\": [\"H\"], \"coordinates\": [0, 0, 0], \"energy\": 1, \"multiplicity\": 0}", "must be at least 1"},
        {"{\"key\": \"m\", \"elements\": [\"H\"], \"coordinates\": [0, 0, 0], \"energy\": 1, \"id\": \"12\"}", "16 hexadecimal digits"},
        {"{\"key\": \"m\", \"elements\": [\"H\"], \"coordinates\": [0, 0, 0], \"energy\": -Infinity}", "not valid JSON"},
        {"{\"key\": \"m\", \"elements\": [\"H\"], \"coordinates\": [0, 0, 0], \"energy\": 1", "expected ',' or '}'"},
    };
    for (size_t c = 0; c < sizeof bad / sizeof bad[0]; c++) {
        char text[600];
        snprintf(text, sizeof text, "%s\n", bad[c].line);
        write_file(path, text);
        d = NULL;
        assert_int_equal(nd_dataset_load(&d, path, 0, NULL, &err), ND_EINPUT);
        assert_contains(err.msg, "json.jsonl, line 1: ");
        assert_contains(err.msg, bad[c].msg);
    }
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_round_trip),
        cmocka_unit_test(test_units),
        cmocka_unit_test(test_bad_lines),
        cmocka_unit_test(test_interrupted_tail),
        cmocka_unit_test(test_writer_refuses_other_units),
        cmocka_unit_test(test_writer_refuses_non_dataset),
        cmocka_unit_test(test_cache),
        cmocka_unit_test(test_hash),
        cmocka_unit_test(test_number_text),
        cmocka_unit_test(test_json_details),
    };
    return cmocka_run_group_tests(tests, make_dir, remove_dir);
}
