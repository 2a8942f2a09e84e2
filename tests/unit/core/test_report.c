/* JSON helpers: atomic documents, molecule summaries, number arrays, JSON Lines. */
#include "tests/lib/testutil.h"

#include "core/report.h"

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

static char *slurp(const char *path)
{
    FILE *f = fopen(path, "rb");
    assert_non_null(f);
    static char buf[65536];
    size_t n = fread(buf, 1, sizeof buf - 1, f);
    buf[n] = '\0';
    fclose(f);
    return buf;
}

/* Methanol: CH4O, 12.011 + 4(1.008) + 15.999 = 32.042 g/mol (IUPAC 2021). */
static void test_molecule_summary(void **state)
{
    (void)state;
    nd_molecule m;
    nd_molecule_init(&m);
    static const int z[6] = {6, 8, 1, 1, 1, 1};
    for (int i = 0; i < 6; i++)
        assert_int_equal(nd_molecule_add_atom(&m, z[i], 0.1 * i, 0, 0, NULL), ND_OK);
    cJSON *o = nd_report_molecule(&m);
    assert_non_null(o);
    assert_true(cJSON_IsNull(cJSON_GetObjectItem(o, "title")));
    assert_string_equal(cJSON_GetObjectItem(o, "formula")->valuestring, "CH4O");
    assert_int_equal(cJSON_GetObjectItem(o, "atoms")->valueint, 6);
    assert_close(cJSON_GetObjectItem(o, "molar_mass")->valuedouble, 32.042, 1e-9);
    assert_null(cJSON_GetObjectItem(o, "bonds")); /* no bond table: no bond count */
    cJSON_Delete(o);
    assert_int_equal(nd_molecule_add_bond(&m, 0, 1, 1, NULL), ND_OK);
    assert_int_equal(nd_molecule_set_title(&m, "fen-001 \"methanol\"", NULL), ND_OK);
    assert_int_equal(nd_molecule_set_data(&m, "a", "1", NULL), ND_OK);
    m.charge = -1;
    o = nd_report_molecule(&m);
    assert_string_equal(cJSON_GetObjectItem(o, "title")->valuestring, "fen-001 \"methanol\"");
    assert_int_equal(cJSON_GetObjectItem(o, "bonds")->valueint, 1);
    assert_int_equal(cJSON_GetObjectItem(o, "data_items")->valueint, 1);
    assert_int_equal(cJSON_GetObjectItem(o, "total_charge")->valueint, -1);
    cJSON_Delete(o);
    nd_molecule_free(&m);
}

static void test_numbers_and_write(void **state)
{
    (void)state;
    cJSON *doc = cJSON_CreateObject();
    double v[4] = {-1.2345678901234567, 2.5e-9, NAN, INFINITY};
    nd_error err;
    assert_int_equal(nd_report_add_numbers(doc, "values", v, 4, &err), ND_OK);
    assert_int_equal(nd_report_add_numbers(doc, "none", NULL, 0, &err), ND_OK);
    assert_int_equal(nd_report_add_numbers(doc, "bad", NULL, 3, &err), ND_EINVAL);
    assert_int_equal(nd_report_add_numbers(doc, "bad", v, -1, &err), ND_EINVAL);
    char dir[] = "/tmp/nadir-report-XXXXXX";
    assert_non_null(mkdtemp(dir));
    char path[256];
    snprintf(path, sizeof path, "%s/out.json", dir);
    assert_int_equal(nd_report_write(doc, path, &err), ND_OK);
    cJSON *back = cJSON_Parse(slurp(path));
    assert_non_null(back);
    cJSON *a = cJSON_GetObjectItem(back, "values");
    assert_int_equal(cJSON_GetArraySize(a), 4);
    assert_true(cJSON_GetArrayItem(a, 0)->valuedouble == -1.2345678901234567); /* cJSON prints 17 digits when needed */
    assert_true(cJSON_IsNull(cJSON_GetArrayItem(a, 2)));
    assert_true(cJSON_IsNull(cJSON_GetArrayItem(a, 3)));
    assert_int_equal(cJSON_GetArraySize(cJSON_GetObjectItem(back, "none")), 0);
    cJSON_Delete(back);
    char bad[300];
    snprintf(bad, sizeof bad, "%s/missing/out.json", dir);
    assert_int_equal(nd_report_write(doc, bad, &err), ND_EIO);
    assert_contains(err.msg, "cannot create a file beside");
    assert_int_equal(nd_report_write(NULL, path, &err), ND_EINVAL);
    cJSON_Delete(doc);
    unlink(path);
    assert_int_equal(rmdir(dir), 0); /* no temporary left behind */
}

static void test_json_lines(void **state)
{
    (void)state;
    char dir[] = "/tmp/nadir-jsonl-XXXXXX";
    assert_non_null(mkdtemp(dir));
    char path[256];
    snprintf(path, sizeof path, "%s/log.jsonl", dir);
    nd_error err;
    for (int round = 0; round < 2; round++) { /* the second open appends */
        nd_report_lines *j;
        assert_int_equal(nd_report_lines_open(&j, path, &err), ND_OK);
        for (int k = 0; k < 3; k++) {
            cJSON *o = cJSON_CreateObject();
            cJSON_AddNumberToObject(o, "n", 3 * round + k);
            cJSON_AddStringToObject(o, "note", "two\nlines");
            assert_int_equal(nd_report_lines_write(j, o, &err), ND_OK);
            cJSON_Delete(o);
            if (k == 1) { /* flushed: the line is in the file already */
                FILE *f = fopen(path, "r");
                int lines = 0, c;
                while ((c = fgetc(f)) != EOF)
                    lines += c == '\n';
                fclose(f);
                assert_int_equal(lines, 3 * round + 2);
            }
        }
        assert_int_equal(nd_report_lines_close(j, &err), ND_OK);
    }
    FILE *f = fopen(path, "r");
    char line[256];
    int n = 0;
    while (fgets(line, sizeof line, f)) {
        cJSON *o = cJSON_Parse(line);
        assert_non_null(o);
        assert_int_equal(cJSON_GetObjectItem(o, "n")->valueint, n);
        assert_string_equal(cJSON_GetObjectItem(o, "note")->valuestring, "two\nlines");
        cJSON_Delete(o);
        n++;
    }
    fclose(f);
    assert_int_equal(n, 6);
    nd_report_lines *j;
    char bad[300];
    snprintf(bad, sizeof bad, "%s/no/dir.jsonl", dir);
    assert_int_equal(nd_report_lines_open(&j, bad, &err), ND_EIO);
    assert_null(j);
    assert_int_equal(nd_report_lines_open(&j, "", &err), ND_EINVAL);
    assert_int_equal(nd_report_lines_close(NULL, &err), ND_OK);
    unlink(path);
    rmdir(dir);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_molecule_summary), cmocka_unit_test(test_numbers_and_write),
        cmocka_unit_test(test_json_lines),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
