/* The progress line: its text, the redraw rate, silence when disabled. */
#include "tests/lib/testutil.h"

#include "core/progress.h"

#include <stdio.h>
#include <stdlib.h>
#include <string.h>

static void test_format(void **state)
{
    (void)state;
    nd_progress p;
    nd_progress_start_at(&p, NULL, 0, "records", 5000, 0.0);
    char buf[160];
    nd_progress_format(&p, 1200, 3.87, buf, sizeof buf);
    /* 1200 / 3.87 s = 310.08/s; (5000 - 1200) / 310.08 = 12.25 s left */
    assert_string_equal(buf, "records 1200/5000   24%  310.1/s  elapsed 0:04  left 0:12");
    nd_progress_format(&p, 5000, 3725.0, buf, sizeof buf);
    assert_string_equal(buf, "records 5000/5000  100%  1.3/s  elapsed 1:02:05  left 0:00");
    nd_progress_format(&p, 0, 0.0, buf, sizeof buf);
    assert_string_equal(buf, "records 0/5000    0%  0.0/s  elapsed 0:00  left ?");
    nd_progress_start_at(&p, NULL, 0, NULL, 0, 0.0); /* unknown total */
    nd_progress_format(&p, 77, 2.2, buf, sizeof buf);
    assert_string_equal(buf, "items 77  35.0/s  elapsed 0:02");
    nd_progress_start_at(&p, NULL, 0, "records", 0, 0.0);
    nd_progress_estimate(&p, 400);
    nd_progress_format(&p, 100, 2.0, buf, sizeof buf); /* 50/s, 300 left: 6 s */
    assert_string_equal(buf, "records 100/~400   25%  50.0/s  elapsed 0:02  left ~0:06");
    nd_progress_format(&p, 500, 2.0, buf, sizeof buf); /* past the estimate: capped at 100% */
    assert_string_equal(buf, "records 500/~400  100%  250.0/s  elapsed 0:02  left ~0:00");
    char tiny[8];
    assert_true(nd_progress_format(&p, 77, 2.2, tiny, sizeof tiny) > 7); /* truncated safely */
    assert_int_equal(strlen(tiny), 7);
}

static void test_redraw_rate(void **state)
{
    (void)state;
    char *buf = NULL;
    size_t len = 0;
    FILE *f = open_memstream(&buf, &len);
    nd_progress p;
    nd_progress_start_at(&p, f, 1, "frames", 100, 10.0);
    assert_int_equal(nd_progress_update_at(&p, 1, 10.01), 1); /* the first call draws */
    assert_int_equal(nd_progress_update_at(&p, 2, 10.10), 0); /* too soon */
    assert_int_equal(nd_progress_update_at(&p, 3, 10.25), 1);
    int draws = 2;
    for (int k = 0; k < 1000; k++) /* one simulated second of calls: at most 5 redraws */
        draws += nd_progress_update_at(&p, 4 + k, 10.25 + 0.001 * (k + 1));
    assert_true(draws <= 2 + 5);
    assert_true(draws >= 2 + 4);
    nd_progress_finish(&p);
    fclose(f);
    assert_non_null(strstr(buf, "\rframes 3/100"));
    assert_non_null(strstr(buf, "\033[K"));
    assert_true(len >= 4 && memcmp(buf + len - 4, "\r\033[K", 4) == 0); /* erased at the end */
    free(buf);

    buf = NULL;
    f = open_memstream(&buf, &len);
    nd_progress_start_at(&p, f, 0, "frames", 100, 0.0); /* disabled: writes nothing */
    assert_int_equal(nd_progress_update_at(&p, 50, 5.0), 0);
    nd_progress_finish(&p);
    fclose(f);
    assert_int_equal(len, 0);
    free(buf);
    assert_true(nd_progress_clock() > 0.0);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_format), cmocka_unit_test(test_redraw_rate),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
