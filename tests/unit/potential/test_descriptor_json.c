/* Descriptor parameters as JSON (potential/descriptor_json.h): an exact
 * round trip, the shipped default file equal to nd_descriptor_defaults,
 * a model header's descriptor read back, and bad files rejected with a
 * message naming the file and the member. */
#include "tests/lib/testutil.h"

#include "potential/descriptor.h"
#include "potential/descriptor_json.h"
#include "potential/model.h"
#include "core/rng.h"

#include <stdio.h>
#include <stdlib.h>
#include <dirent.h>
#include <string.h>
#include <unistd.h>

/* An unround, non-default descriptor: 3 radial, 7 angular functions. */
static void unround_params(nd_descriptor_params *p)
{
    memset(p, 0, sizeof *p);
    p->radial_cutoff = 5.873;
    p->nradial = 3;
    for (int i = 0; i < 3; i++) {
        p->radial_eta[i] = 3.1 + 0.7 * i + 1.0 / 3.0;
        p->radial_shift[i] = 0.9 + 1.385 * i;
    }
    p->angular_cutoff = 4.125;
    p->nangular = 7;
    for (int i = 0; i < 7; i++) {
        p->angular_eta[i] = 0.0137 * (i + 1) + 1e-9 / 3.0;
        p->angular_zeta[i] = 1 << (i % 4);
        p->angular_lambda[i] = i % 2 ? -1 : 1;
    }
}

static void test_round_trip(void **state)
{
    (void)state;
    nd_descriptor_params p, q;
    unround_params(&p);
    cJSON *d = cJSON_CreateObject();
    nd_descriptor_json_add(d, &p);
    char *text = cJSON_Print(d);
    cJSON_Delete(d);
    const char *path = nd_test_write_temp(text, ".json");
    free(text);
    nd_error err;
    assert_int_equal(nd_descriptor_json_load(path, &q, &err), ND_OK);
    assert_true(nd_descriptor_equal(&p, &q));
    /* every bit, not just within a tolerance */
    assert_memory_equal(p.radial_eta, q.radial_eta, sizeof p.radial_eta);
    assert_memory_equal(p.angular_eta, q.angular_eta, sizeof p.angular_eta);
    q.angular_lambda[6] = -p.angular_lambda[6];
    assert_false(nd_descriptor_equal(&p, &q));
}

/* potential/descriptors/default.json is what a model trained without
 * --descriptor uses; the help text says so. */
static void test_default_file(void **state)
{
    (void)state;
    nd_descriptor_params p, dflt;
    nd_error err;
    assert_int_equal(nd_descriptor_json_load("potential/descriptors/default.json", &p, &err),
                     ND_OK);
    nd_descriptor_defaults(&dflt);
    assert_true(nd_descriptor_equal(&p, &dflt));
}

/* Every descriptor file shipped in potential/descriptors/ loads (a
 * candidate file there cannot rot unnoticed). */
static void test_shipped_files(void **state)
{
    (void)state;
    DIR *dir = opendir("potential/descriptors");
    assert_non_null(dir);
    int n = 0;
    struct dirent *ent;
    while ((ent = readdir(dir))) {
        size_t len = strlen(ent->d_name);
        if (len < 6 || strcmp(ent->d_name + len - 5, ".json") != 0)
            continue;
        char path[512];
        snprintf(path, sizeof path, "potential/descriptors/%s", ent->d_name);
        nd_descriptor_params p;
        nd_error err;
        int s = nd_descriptor_json_load(path, &p, &err);
        if (s)
            fprintf(stderr, "%s\n", err.msg);
        assert_int_equal(s, ND_OK);
        n++;
    }
    closedir(dir);
    assert_true(n >= 2);
}

/* A model file's header (its first JSON object, holding "descriptor") read
 * as a descriptor file gives the model's descriptor. */
static void test_from_model_header(void **state)
{
    (void)state;
    nd_model_spec s;
    nd_model_spec_defaults(&s);
    s.nhidden = 1;
    s.hidden[0] = 3;
    s.members = 1;
    unround_params(&s.descriptor);
    nd_model *m;
    nd_error err;
    assert_int_equal(nd_model_new(&m, &s, 11, &err), ND_OK);
    char path[] = "/tmp/nd-desc-json-XXXXXX";
    int fd = mkstemp(path);
    assert_true(fd >= 0);
    close(fd);
    assert_int_equal(nd_model_save(m, path, &err), ND_OK);
    nd_model_free(m);
    /* the header: from the first '{' to the line that closes it */
    FILE *f = fopen(path, "rb");
    assert_non_null(f);
    char *buf = calloc(1, 1 << 20);
    size_t n = fread(buf, 1, (1 << 20) - 1, f);
    fclose(f);
    unlink(path);
    char *open = strchr(buf, '{'), *close_at = strstr(buf, "\n}\n");
    assert_non_null(open);
    assert_non_null(close_at);
    assert_true((size_t)(close_at - buf) < n);
    close_at[2] = 0;
    const char *hdr = nd_test_write_temp(open, ".json");
    free(buf);
    nd_descriptor_params q;
    assert_int_equal(nd_descriptor_json_load(hdr, &q, &err), ND_OK);
    assert_true(nd_descriptor_equal(&s.descriptor, &q));
}

/* Each bad file gives ND_EINPUT (or ND_EIO) and a message with the file
 * name and the stated words. */
static void test_rejects(void **state)
{
    (void)state;
    static const struct {
        const char *text, *words;
    } bad[] = {
        {"", "not valid JSON"},
        {"{\"radial_cutoff\": 5,\n \"radial\": [", "line 2: not valid JSON"},
        {"[1, 2]", "is not a JSON object"},
        {"{\"radial_cutoff\": 5, \"angular_cutoff\": 3, \"radial\": [{\"eta\": 1, \"shift\": 1}], "
         "\"angular\": []}\n\n}", "line 3: text after the JSON object"},
        {"{\"angular_cutoff\": 3, \"radial\": [], \"angular\": []}", "lacks the number \"radial_cutoff\""},
        {"{\"radial_cutoff\": 5, \"angular_cutoff\": 3, \"radial\": {}, \"angular\": []}",
         "lacks the \"radial\" or \"angular\" list"},
        {"{\"radial_cutoff\": 5, \"angular_cutoff\": 3, \"radial\": [{\"eta\": 1}], \"angular\": []}",
         "\"radial\" entry 1 lacks the number \"shift\""},
        {"{\"radial_cutoff\": 5, \"angular_cutoff\": 3, \"radial\": [{\"eta\": 1, \"shift\": 1}], "
         "\"angular\": [{\"eta\": 0.1, \"zeta\": 1.5, \"lambda\": 1}]}",
         "\"angular\" entry 1: \"zeta\" = 1.5 is not a small whole number"},
        {"{\"radial_cutoff\": 5, \"angular_cutoff\": 6, \"radial\": [{\"eta\": 1, \"shift\": 1}], "
         "\"angular\": [{\"eta\": 0.1, \"zeta\": 2, \"lambda\": 1}]}",
         "angular cutoff"},
        {"{\"radial_cutoff\": 5, \"angular_cutoff\": 3, \"radial\": [{\"eta\": 1, \"shift\": 1}], "
         "\"angular\": [{\"eta\": 0.1, \"zeta\": 2, \"lambda\": 0}]}",
         "lambda"},
        {"{\"radial_cutoff\": 5, \"angular_cutoff\": 3, \"radial\": [], \"angular\": []}", "radial"},
    };
    for (size_t i = 0; i < sizeof bad / sizeof bad[0]; i++) {
        const char *path = nd_test_write_temp(bad[i].text, ".json");
        nd_descriptor_params p;
        nd_error err;
        assert_int_equal(nd_descriptor_json_load(path, &p, &err), ND_EINPUT);
        assert_contains(err.msg, path);
        assert_contains(err.msg, bad[i].words);
    }
    /* too many functions: 17 angular sets */
    char text[4096] = "{\"radial_cutoff\": 5, \"angular_cutoff\": 3, "
                      "\"radial\": [{\"eta\": 1, \"shift\": 1}], \"angular\": [";
    for (int i = 0; i < ND_DESC_MAX_ANGULAR + 1; i++)
        strcat(text, i ? ", {\"eta\": 0.1, \"zeta\": 1, \"lambda\": 1}"
                       : "{\"eta\": 0.1, \"zeta\": 1, \"lambda\": 1}");
    strcat(text, "]}");
    nd_descriptor_params p;
    nd_error err;
    assert_int_equal(nd_descriptor_json_load(nd_test_write_temp(text, ".json"), &p, &err),
                     ND_EINPUT);
    assert_contains(err.msg, "17 angular functions; at most 32 and 16");
    /* a NUL byte, and a missing file */
    char nul[] = "{\"a\": 1}\0junk";
    const char *np = nd_test_write_temp("x", ".json");
    FILE *f = fopen(np, "wb");
    assert_int_equal(fwrite(nul, 1, sizeof nul, f), sizeof nul);
    fclose(f);
    assert_int_equal(nd_descriptor_json_load(np, &p, &err), ND_EINPUT);
    assert_contains(err.msg, "NUL byte");
    assert_int_equal(nd_descriptor_json_load("/nonexistent/d.json", &p, &err), ND_EIO);
    assert_contains(err.msg, "/nonexistent/d.json: cannot open the descriptor file");
}

/* Seeded mutations of the default file (bytes changed, dropped, repeated,
 * the text cut short): every result is either a valid descriptor or
 * ND_EINPUT with a message naming the input; never a crash (the suite also
 * runs under the sanitizers). */
static void test_mutations(void **state)
{
    (void)state;
    FILE *f = fopen("potential/descriptors/default.json", "rb");
    assert_non_null(f);
    char orig[8192];
    size_t n0 = fread(orig, 1, sizeof orig, f);
    fclose(f);
    assert_true(n0 > 100 && n0 < sizeof orig);
    static const char alphabet[] = "{}[]\":,0123456789.-+eE \n\"etazlmbdrcfu";
    nd_rng r;
    nd_rng_seed(&r, 20261203);
    char buf[2 * sizeof orig];
    int valid = 0, rejected = 0;
    for (int it = 0; it < 4000; it++) {
        memcpy(buf, orig, n0);
        size_t n = n0;
        int edits = 1 + (int)nd_rng_below(&r, 4);
        for (int e = 0; e < edits && n > 0; e++) {
            size_t at = (size_t)nd_rng_below(&r, (uint64_t)n);
            switch (nd_rng_below(&r, 4)) {
            case 0: buf[at] = alphabet[nd_rng_below(&r, sizeof alphabet - 1)]; break;
            case 1: memmove(buf + at, buf + at + 1, n - at - 1); n--; break;
            case 2: memmove(buf + at + 1, buf + at, n - at); n++; break;
            default: n = at; break;
            }
        }
        nd_descriptor_params p;
        nd_error err;
        int s = nd_descriptor_json_parse(buf, n, "mutant.json", &p, &err);
        if (s == ND_OK) {
            assert_int_equal(nd_descriptor_check(&p, NULL), ND_OK);
            valid++;
        } else {
            assert_int_equal(s, ND_EINPUT);
            assert_contains(err.msg, "mutant.json");
            rejected++;
        }
    }
    /* both outcomes occur, so the mutations reach past the JSON syntax */
    assert_true(valid > 100 && rejected > 100);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_round_trip),
        cmocka_unit_test(test_default_file),
        cmocka_unit_test(test_shipped_files),
        cmocka_unit_test(test_from_model_header),
        cmocka_unit_test(test_rejects),
        cmocka_unit_test(test_mutations),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
