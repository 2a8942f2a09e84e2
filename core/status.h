/* Result codes and the error record every library call can fill in. */
#ifndef ND_STATUS_H
#define ND_STATUS_H

/* One enum for every result. ND_OK and the two "not an error" codes
 * (ND_CONTINUE, ND_END) are kept apart from the errors, which are all >= 10. */
typedef enum nd_status {
    ND_OK = 0,          /* success */
    ND_CONTINUE = 1,    /* iteration not converged yet: call again */
    ND_END = 2,         /* no more records in the input */
    ND_EINVAL = 10,     /* bad argument from the caller (a bug or a usage error) */
    ND_EINPUT = 11,     /* malformed or impossible input data */
    ND_EIO = 12,        /* a file could not be opened, read or written */
    ND_ENOMEM = 13,     /* out of memory */
    ND_EDOMAIN = 14,    /* outside what the model was trained for (element, charge) */
    ND_ECOMPUTE = 15,   /* a computation failed (non-finite values, no convergence where required) */
    ND_EEXTERNAL = 16   /* an external program failed, timed out or answered nonsense */
} nd_status;

#define ND_ERROR_MSG_MAX 512

/* The error record: the code and a message for the user naming the file,
 * line or atom and what was expected. Plain data on the caller's stack. */
typedef struct nd_error {
    nd_status code;
    char msg[ND_ERROR_MSG_MAX];
} nd_error;

/* Records code and a printf-style message in err (which may be NULL) and
 * returns code, so callers write `return nd_fail(err, ND_EINPUT, "...")`.
 * A message already in err is replaced. */
int nd_fail(nd_error *err, nd_status code, const char *fmt, ...)
    __attribute__((format(printf, 3, 4)));

/* Prepends "prefix: " to the message in err (for adding a file name or record
 * number as an error travels up). Does nothing if err is NULL. */
void nd_error_prefix(nd_error *err, const char *fmt, ...)
    __attribute__((format(printf, 2, 3)));

/* Clears err to ND_OK with an empty message. */
void nd_error_clear(nd_error *err);

/* A short fixed name of a status code ("input error"); never NULL. */
const char *nd_status_name(int code);

#endif
