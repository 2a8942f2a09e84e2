/* The error record. */
#include "tests/lib/testutil.h"

#include "core/status.h"

#include <string.h>

static void test_fail_and_prefix(void **state)
{
    (void)state;
    nd_error err;
    nd_error_clear(&err);
    assert_int_equal(err.code, ND_OK);
    assert_int_equal(nd_fail(&err, ND_EINPUT, "line %d: expected %s", 7, "a number"), ND_EINPUT);
    assert_string_equal(err.msg, "line 7: expected a number");
    nd_error_prefix(&err, "%s, record %d", "in.sdf", 3);
    assert_string_equal(err.msg, "in.sdf, record 3: line 7: expected a number");
    assert_int_equal(nd_fail(NULL, ND_EIO, "nobody listens"), ND_EIO);
    nd_error_prefix(NULL, "x");
    char big[2000];
    memset(big, 'x', sizeof big - 1);
    big[sizeof big - 1] = '\0';
    nd_fail(&err, ND_EINPUT, "%s", big); /* truncated, never overflows */
    assert_int_equal((int)strlen(err.msg), ND_ERROR_MSG_MAX - 1);
    nd_error_prefix(&err, "%s", big);
    assert_int_equal((int)strlen(err.msg), ND_ERROR_MSG_MAX - 1);
}

static void test_names(void **state)
{
    (void)state;
    assert_string_equal(nd_status_name(ND_EINPUT), "input error");
    assert_string_equal(nd_status_name(ND_END), "end of input");
    assert_string_equal(nd_status_name(12345), "unknown status");
}

int main(void)
{
    const struct CMUnitTest tests[] = {cmocka_unit_test(test_fail_and_prefix), cmocka_unit_test(test_names)};
    return cmocka_run_group_tests(tests, NULL, NULL);
}
