/* A progress line on stderr for long loops: items done of total, rate,
 * time elapsed and time left, redrawn at most a few times a second, and
 * only when stderr is a terminal (so logs and pipes stay clean). Used by
 * the program's loops; library computations never call it. Plain data on
 * the caller's stack; nothing to free. */
#ifndef ND_PROGRESS_H
#define ND_PROGRESS_H

#include <stddef.h>
#include <stdio.h>

/* Least time between two redraws, seconds (5 per second at most). */
#define ND_PROGRESS_INTERVAL 0.2

typedef struct nd_progress {
    FILE *out;          /* where the line goes (stderr) */
    int enabled;        /* 0: every call does nothing */
    char label[40];     /* what is counted ("records") */
    long total;         /* items expected, or <= 0 when unknown */
    int estimated;      /* 1 when total is an estimate (shown as "~N") */
    double start;       /* clock at start, seconds */
    double last_draw;   /* clock at the last redraw */
    int drawn;          /* 1 when a line is on the screen */
} nd_progress;

/* Starts p on stderr, enabled only when stderr is a terminal. total <= 0
 * means "unknown": no remaining time is shown. */
void nd_progress_start(nd_progress *p, const char *label, long total);

/* Same on any stream, enabled or not as asked, at clock time now (seconds,
 * any origin): for tests and for callers with their own clock. */
void nd_progress_start_at(nd_progress *p, FILE *out, int enabled, const char *label, long total,
                          double now);

/* Sets the total to an estimate, e.g. from the share of a file read so
 * far: total = done * size / bytes_read. Shown as "~N". */
void nd_progress_estimate(nd_progress *p, long total);

/* Reports done items; redraws if ND_PROGRESS_INTERVAL has passed since the
 * last redraw (the first call always draws). */
void nd_progress_update(nd_progress *p, long done);

/* Same at clock time now. Returns 1 if it redrew, else 0. */
int nd_progress_update_at(nd_progress *p, long done, double now);

/* Erases the line (if one was drawn), leaving the cursor at column 0. */
void nd_progress_finish(nd_progress *p);

/* The text of the line for done items after elapsed seconds, e.g.
 * "records 1200/5000  24%  310.2/s  elapsed 0:03  left 0:12", into buf
 * (size bytes, always terminated). Returns the length snprintf reports. */
int nd_progress_format(const nd_progress *p, long done, double elapsed, char *buf, size_t size);

/* Monotonic clock in seconds. */
double nd_progress_clock(void);

#endif
