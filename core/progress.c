#include "core/progress.h"

#include <math.h>
#include <string.h>
#include <time.h>
#include <unistd.h>

double nd_progress_clock(void)
{
    struct timespec ts;
    clock_gettime(CLOCK_MONOTONIC, &ts);
    return (double)ts.tv_sec + 1e-9 * (double)ts.tv_nsec;
}

void nd_progress_start_at(nd_progress *p, FILE *out, int enabled, const char *label, long total,
                          double now)
{
    memset(p, 0, sizeof *p);
    p->out = out;
    p->enabled = enabled && out != NULL;
    snprintf(p->label, sizeof p->label, "%s", label ? label : "items");
    p->total = total;
    p->start = now;
    p->last_draw = now;
}

void nd_progress_start(nd_progress *p, const char *label, long total)
{
    nd_progress_start_at(p, stderr, isatty(fileno(stderr)), label, total, nd_progress_clock());
}

/* Formats seconds as m:ss or h:mm:ss into buf (16 bytes). */
static void clock_text(double s, char *buf)
{
    if (!(s >= 0.0) || s > 1e8)
        s = 0.0;
    int t = (int)lround(s); /* below 1e8 s: fits an int */
    if (t >= 3600)
        snprintf(buf, 16, "%d:%02d:%02d", (t / 3600) % 100000, (t / 60) % 60, t % 60);
    else
        snprintf(buf, 16, "%d:%02d", (t / 60) % 60, t % 60);
}

int nd_progress_format(const nd_progress *p, long done, double elapsed, char *buf, size_t size)
{
    char el[16], left[16];
    clock_text(elapsed, el);
    double rate = elapsed > 0.0 ? (double)done / elapsed : 0.0;
    if (p->total > 0) {
        double frac = (double)done / (double)p->total;
        if (frac > 1.0)
            frac = 1.0; /* an estimate may be passed */
        if (rate > 0.0 && done < p->total)
            clock_text((double)(p->total - done) / rate, left);
        else
            snprintf(left, sizeof left, "%s", done >= p->total ? "0:00" : "?");
        return snprintf(buf, size, "%s %ld/%s%ld  %3.0f%%  %.1f/s  elapsed %s  left %s%s",
                        p->label, done, p->estimated ? "~" : "", p->total, 100.0 * frac, rate, el,
                        p->estimated ? "~" : "", left);
    }
    return snprintf(buf, size, "%s %ld  %.1f/s  elapsed %s", p->label, done, rate, el);
}

void nd_progress_estimate(nd_progress *p, long total)
{
    p->total = total;
    p->estimated = 1;
}

int nd_progress_update_at(nd_progress *p, long done, double now)
{
    if (!p->enabled)
        return 0;
    if (p->drawn && now - p->last_draw < ND_PROGRESS_INTERVAL)
        return 0;
    char line[160];
    nd_progress_format(p, done, now - p->start, line, sizeof line);
    /* carriage return, the text, then erase to the end of the line (ECMA-48 EL) */
    fprintf(p->out, "\r%s\033[K", line);
    fflush(p->out);
    p->last_draw = now;
    p->drawn = 1;
    return 1;
}

void nd_progress_update(nd_progress *p, long done)
{
    if (p->enabled)
        nd_progress_update_at(p, done, nd_progress_clock());
}

void nd_progress_finish(nd_progress *p)
{
    if (p->enabled && p->drawn) {
        fputs("\r\033[K", p->out);
        fflush(p->out);
    }
    p->drawn = 0;
}
