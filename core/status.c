#include "core/status.h"

#include <stdarg.h>
#include <stdio.h>
#include <string.h>

int nd_fail(nd_error *err, nd_status code, const char *fmt, ...)
{
    if (err) {
        va_list ap;
        va_start(ap, fmt);
        vsnprintf(err->msg, sizeof err->msg, fmt, ap);
        va_end(ap);
        err->code = code;
    }
    return code;
}

void nd_error_prefix(nd_error *err, const char *fmt, ...)
{
    if (!err)
        return;
    char head[ND_ERROR_MSG_MAX];
    va_list ap;
    va_start(ap, fmt);
    vsnprintf(head, sizeof head, fmt, ap);
    va_end(ap);
    char old[ND_ERROR_MSG_MAX];
    memcpy(old, err->msg, sizeof old);
    old[sizeof old - 1] = '\0';
    /* Assemble by hand: snprintf of two full buffers trips -Wformat-truncation. */
    size_t nh = strlen(head), no = strlen(old), cap = sizeof err->msg - 1, k = 0;
    for (size_t i = 0; i < nh && k < cap; i++)
        err->msg[k++] = head[i];
    for (size_t i = 0; i < 2 && k < cap; i++)
        err->msg[k++] = ": "[i];
    for (size_t i = 0; i < no && k < cap; i++)
        err->msg[k++] = old[i];
    err->msg[k] = '\0';
}

void nd_error_clear(nd_error *err)
{
    if (err) {
        err->code = ND_OK;
        err->msg[0] = '\0';
    }
}

const char *nd_status_name(int code)
{
    switch (code) {
    case ND_OK: return "ok";
    case ND_CONTINUE: return "not converged yet";
    case ND_END: return "end of input";
    case ND_EINVAL: return "invalid argument";
    case ND_EINPUT: return "input error";
    case ND_EIO: return "i/o error";
    case ND_ENOMEM: return "out of memory";
    case ND_EDOMAIN: return "outside the model's domain";
    case ND_ECOMPUTE: return "computation failed";
    case ND_EEXTERNAL: return "external program failed";
    default: return "unknown status";
    }
}
