/* Helpers shared by the cmocka unit tests. Include after <cmocka.h>'s
 * prerequisites; this header includes them itself. */
#ifndef ND_TESTUTIL_H
#define ND_TESTUTIL_H

#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <cmocka.h>

/* Fails the test unless |a - b| <= tol, printing both values. */
#define assert_close(a, b, tol) nd_test_assert_close((a), (b), (tol), #a, #b, __FILE__, __LINE__)
void nd_test_assert_close(double a, double b, double tol, const char *sa, const char *sb,
                          const char *file, int line);

/* Fails the test unless |a - b| <= rel * max(|a|, |b|, floor). */
#define assert_rel_close(a, b, rel, floor) \
    nd_test_assert_rel_close((a), (b), (rel), (floor), #a, #b, __FILE__, __LINE__)
void nd_test_assert_rel_close(double a, double b, double rel, double floor, const char *sa,
                              const char *sb, const char *file, int line);

/* Fails unless haystack contains needle (for checking error messages). */
#define assert_contains(haystack, needle) \
    nd_test_assert_contains((haystack), (needle), __FILE__, __LINE__)
void nd_test_assert_contains(const char *haystack, const char *needle, const char *file, int line);

/* Writes text to a new temporary file whose name ends in suffix (".xyz"),
 * removed when the test program exits;
 * returns the path in static storage that is valid until the next call. */
const char *nd_test_write_temp(const char *text, const char *suffix);

/* 1 when the suite runs under the sanitizers (build-san), so expensive
 * tests can shrink their sizes, never their assertions. */
int nd_test_sanitized(void);

#endif
