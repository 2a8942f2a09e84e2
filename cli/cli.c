#include "cli/cli.h"

#include <errno.h>
#include <limits.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>

int cli_exit_code(int status)
{
    switch (status) {
    case ND_OK: return ND_EXIT_OK;
    case ND_EINVAL: return ND_EXIT_USAGE;
    case ND_EINPUT:
    case ND_EIO:
    case ND_EDOMAIN: return ND_EXIT_INPUT;
    case ND_ECOMPUTE:
    case ND_EEXTERNAL:
    case ND_CONTINUE: return ND_EXIT_COMPUTE;
    default: return ND_EXIT_INTERNAL;
    }
}

int cli_fail(const char *command, int status, const char *fmt, ...)
{
    va_list ap;
    va_start(ap, fmt);
    fprintf(stderr, "nadir %s: ", command);
    vfprintf(stderr, fmt, ap);
    fputc('\n', stderr);
    va_end(ap);
    return cli_exit_code(status);
}

int cli_error(const char *command, const nd_error *err)
{
    fprintf(stderr, "nadir %s: %s\n", command, err->msg[0] ? err->msg : nd_status_name(err->code));
    return cli_exit_code(err->code);
}

int cli_usage(const char *command, const char *fmt, ...)
{
    va_list ap;
    va_start(ap, fmt);
    fprintf(stderr, "nadir %s: ", command);
    vfprintf(stderr, fmt, ap);
    fprintf(stderr, "\n(see: nadir %s --help)\n", command);
    va_end(ap);
    return ND_EXIT_USAGE;
}

int cli_parse_double(const char *s, double *out)
{
    char *end;
    errno = 0;
    double v = strtod(s, &end);
    if (end == s || *end != '\0' || errno == ERANGE)
        return -1;
    *out = v;
    return 0;
}

int cli_parse_int(const char *s, int *out)
{
    char *end;
    errno = 0;
    long v = strtol(s, &end, 10);
    if (end == s || *end != '\0' || errno == ERANGE || v < INT_MIN || v > INT_MAX)
        return -1;
    *out = (int)v;
    return 0;
}
