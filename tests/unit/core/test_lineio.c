/* The line source: memory then FILE, line ends, push-back, limits, numbers. */
#include "tests/lib/testutil.h"

#include "core/lineio.h"

#include <stdio.h>
#include <stdlib.h>
#include <string.h>

static void test_lines(void **state)
{
    (void)state;
    const char *head = "first\r\nsec";
    FILE *f = tmpfile();
    assert_non_null(f);
    fputs("ond\n\nlast without end", f);
    rewind(f);
    nd_lines l;
    nd_lines_init(&l, "in.txt", "record", head, strlen(head), f);
    nd_error err;
    assert_int_equal(nd_lines_next(&l, &err), ND_OK);
    assert_string_equal(l.buf, "first"); /* CRLF stripped */
    assert_int_equal(l.lineno, 1);
    assert_int_equal(nd_lines_next(&l, &err), ND_OK);
    assert_string_equal(l.buf, "second"); /* joined across memory and file */
    nd_lines_unread(&l);
    assert_int_equal(nd_lines_next(&l, &err), ND_OK);
    assert_string_equal(l.buf, "second");
    assert_int_equal(l.lineno, 2);
    assert_int_equal(nd_lines_next(&l, &err), ND_OK);
    assert_string_equal(l.buf, "");
    assert_int_equal(l.len, 0);
    assert_int_equal(nd_lines_next(&l, &err), ND_OK);
    assert_string_equal(l.buf, "last without end");
    assert_int_equal(l.lineno, 4);
    assert_int_equal(nd_lines_next(&l, &err), ND_END);
    assert_int_equal(nd_lines_next(&l, &err), ND_END);
    nd_lines_free(&l);
    nd_lines_free(NULL);
    fclose(f);
}

/* A line past ND_LINE_MAX and a NUL byte are errors naming the line; the
 * next line still reads. */
static void test_limits(void **state)
{
    (void)state;
    size_t n = (size_t)ND_LINE_MAX + 10;
    char *big = malloc(n + 32);
    assert_non_null(big);
    memset(big, 'x', n);
    memcpy(big + n, "\nok\na\0b\nend\n", 12);
    nd_lines l;
    nd_lines_init(&l, "big.xyz", "frame", big, n + 12, NULL);
    l.record = 3;
    nd_error err;
    assert_int_equal(nd_lines_next(&l, &err), ND_EINPUT);
    assert_contains(err.msg, "big.xyz, frame 3, line 1: line longer than 1048576 bytes");
    assert_int_equal(nd_lines_next(&l, &err), ND_OK);
    assert_string_equal(l.buf, "ok");
    assert_int_equal(nd_lines_next(&l, &err), ND_EINPUT);
    assert_contains(err.msg, "line 3: line holds a NUL byte");
    assert_int_equal(nd_lines_next(&l, &err), ND_OK);
    assert_string_equal(l.buf, "end");
    nd_lines_free(&l);
    free(big);
}

/* A UTF-8 byte-order mark is dropped from the first line only. */
static void test_byte_order_mark(void **state)
{
    (void)state;
    const char *text = "\xef\xbb\xbf" "3\n\xef\xbb\xbfkept\n";
    nd_lines l;
    nd_lines_init(&l, "bom.xyz", "frame", text, strlen(text), NULL);
    nd_error err;
    assert_int_equal(nd_lines_next(&l, &err), ND_OK);
    assert_string_equal(l.buf, "3");
    assert_int_equal(l.len, 1);
    assert_int_equal(nd_lines_next(&l, &err), ND_OK);
    assert_string_equal(l.buf, "\xef\xbb\xbfkept");
    nd_lines_free(&l);
}

static void test_fail_format(void **state)
{
    (void)state;
    nd_lines l;
    nd_lines_init(&l, "a.sdf", "record", "", 0, NULL);
    nd_error err;
    assert_int_equal(nd_lines_fail(&l, &err, ND_EINPUT, 12, "bad %s", "thing"), ND_EINPUT);
    assert_string_equal(err.msg, "a.sdf, line 12: bad thing");
    l.record = 4;
    nd_lines_fail(&l, &err, ND_EINPUT, 0, "whole record");
    assert_string_equal(err.msg, "a.sdf, record 4: whole record");
    assert_int_equal(nd_lines_fail(&l, NULL, ND_EIO, 1, "x"), ND_EIO);
}

/* Number parsing: plain decimals only; inf/nan words are "not finite". */
static void test_numbers(void **state)
{
    (void)state;
    double v;
    assert_int_equal(nd_text_double("-1.25", &v), 0);
    assert_true(v == -1.25);
    assert_int_equal(nd_text_double(".5", &v), 0);
    assert_true(v == 0.5);
    assert_int_equal(nd_text_double("3.", &v), 0);
    assert_true(v == 3.0);
    assert_int_equal(nd_text_double("+2.5e-3", &v), 0);
    assert_true(v == 2.5e-3);
    assert_int_equal(nd_text_double("1.5D+01", &v), 0);
    assert_true(v == 15.0);
    assert_int_equal(nd_text_double("1e", &v), -1);
    assert_int_equal(nd_text_double("", &v), -1);
    assert_int_equal(nd_text_double(".", &v), -1);
    assert_int_equal(nd_text_double("0x1p3", &v), -1);
    assert_int_equal(nd_text_double("1,5", &v), -1);
    assert_int_equal(nd_text_double("NaN", &v), -2);
    assert_int_equal(nd_text_double("-Infinity", &v), -2);
    assert_int_equal(nd_text_double("1e400", &v), -2);
    long k;
    assert_int_equal(nd_text_long("-42", &k), 0);
    assert_int_equal(k, -42);
    assert_int_equal(nd_text_long("+7", &k), 0);
    assert_int_equal(k, 7);
    assert_int_equal(nd_text_long("4.0", &k), -1);
    assert_int_equal(nd_text_long("", &k), -1);
    assert_int_equal(nd_text_long("99999999999999999999", &k), -1);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_lines), cmocka_unit_test(test_limits),
        cmocka_unit_test(test_fail_format), cmocka_unit_test(test_byte_order_mark), cmocka_unit_test(test_numbers),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
