#include "tests/lib/testutil.h"
#include "core/numeric.h"

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

void nd_test_assert_close(double a, double b, double tol, const char *sa, const char *sb,
                          const char *file, int line)
{
    if (!(fabs(a - b) <= tol)) {
        print_error("%s = %.17g, %s = %.17g: differ by %.3g > %.3g\n", sa, a, sb, b, fabs(a - b), tol);
        _fail(file, line);
    }
}

void nd_test_assert_rel_close(double a, double b, double rel, double floor, const char *sa,
                              const char *sb, const char *file, int line)
{
    double scale = nd_larger(nd_larger(fabs(a), fabs(b)), floor);
    if (!(fabs(a - b) <= rel * scale)) {
        print_error("%s = %.17g, %s = %.17g: relative difference %.3g > %.3g\n", sa, a, sb, b,
                    fabs(a - b) / scale, rel);
        _fail(file, line);
    }
}

void nd_test_assert_contains(const char *haystack, const char *needle, const char *file, int line)
{
    if (!haystack || !strstr(haystack, needle)) {
        print_error("expected \"%s\" in \"%s\"\n", needle, haystack ? haystack : "(null)");
        _fail(file, line);
    }
}

/* Temporary files made by nd_test_write_temp, removed when the test exits. */
static char temp_paths[4096][256];
static int ntemp;

static void remove_temp_files(void)
{
    for (int i = 0; i < ntemp; i++)
        remove(temp_paths[i]);
}

const char *nd_test_write_temp(const char *text, const char *suffix)
{
    static char path[256];
    const char *dir = getenv("TMPDIR");
    snprintf(path, sizeof path, "%s/nadir-test-XXXXXX%s", dir ? dir : "/tmp", suffix);
    int fd = mkstemps(path, (int)strlen(suffix));
    if (fd < 0)
        return NULL;
    size_t n = strlen(text);
    if (write(fd, text, n) != (ssize_t)n) {
        close(fd);
        return NULL;
    }
    close(fd);
    if (ntemp == 0)
        atexit(remove_temp_files);
    if (ntemp < 4096)
        memcpy(temp_paths[ntemp++], path, sizeof path);
    return path;
}

int nd_test_sanitized(void)
{
    const char *b = getenv("ND_BUILD");
    return b && strstr(b, "san") != NULL;
}
