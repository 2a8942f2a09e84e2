/* The scipy L-BFGS-B bridge (see scipy_bridge.h): a child python3 process
 * on two pipes, speaking the line protocol described in the helper script. */
#include "tests/lib/scipy_bridge.h"

#include "core/status.h"

#include <signal.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/types.h>
#include <sys/wait.h>
#include <unistd.h>

static const char *PYTHON = "/usr/bin/python3";
static const char *SCRIPT = "tests/reference/helpers/scipy_lbfgsb.py";

int nd_test_scipy_available(void)
{
    static int known = -1;
    if (known < 0) {
        char cmd[512];
        snprintf(cmd, sizeof cmd, "%s -c 'import scipy.optimize' >/dev/null 2>&1 && test -r %s", PYTHON,
                 SCRIPT);
        known = system(cmd) == 0;
    }
    return known;
}

/* Parses exactly m numbers from s into v; 0 on success. */
static int parse_numbers(char *s, double *v, int m)
{
    for (int i = 0; i < m; i++) {
        char *end;
        v[i] = strtod(s, &end);
        if (end == s)
            return -1;
        s = end;
    }
    return 0;
}

int nd_test_scipy_lbfgsb(const nd_energy *pot, int n, double *x, double max_force, int memory,
                         int max_iter, nd_test_scipy_result *res)
{
    memset(res, 0, sizeof *res);
    int to_py[2], from_py[2];
    if (pipe(to_py) != 0)
        return -1;
    if (pipe(from_py) != 0) {
        close(to_py[0]);
        close(to_py[1]);
        return -1;
    }
    signal(SIGPIPE, SIG_IGN);
    fflush(NULL);
    pid_t pid = fork();
    if (pid < 0)
        return -1;
    if (pid == 0) {
        dup2(to_py[0], 0);
        dup2(from_py[1], 1);
        close(to_py[0]);
        close(to_py[1]);
        close(from_py[0]);
        close(from_py[1]);
        execl(PYTHON, PYTHON, SCRIPT, (char *)NULL);
        _exit(127);
    }
    close(to_py[0]);
    close(from_py[1]);
    FILE *w = fdopen(to_py[1], "w"), *r = fdopen(from_py[0], "r");
    size_t n3 = 3 * (size_t)n;
    double *g = malloc(n3 * sizeof *g), *xq = malloc(n3 * sizeof *xq);
    char *line = NULL;
    size_t cap = 0;
    int status = -1;
    if (!w || !r || !g || !xq)
        goto done;
    fprintf(w, "%d %.17g %d %d\n", n, max_force, memory, max_iter);
    for (size_t i = 0; i < n3; i++)
        fprintf(w, "%.17g%c", x[i], i + 1 < n3 ? ' ' : '\n');
    fflush(w);
    while (getline(&line, &cap, r) > 0) {
        if (strncmp(line, "x ", 2) == 0) {
            double e;
            if (parse_numbers(line + 2, xq, (int)n3) != 0 || pot->fn(pot->ctx, n, xq, &e, g) != ND_OK) {
                fprintf(w, "error\n");
                fflush(w);
                goto done;
            }
            fprintf(w, "%.17g", e);
            for (size_t i = 0; i < n3; i++)
                fprintf(w, " %.17g", g[i]);
            fputc('\n', w);
            fflush(w);
        } else if (strncmp(line, "done ", 5) == 0) {
            int calls, nit, conv;
            double e, fm;
            if (sscanf(line + 5, "%d %d %d %lf %lf", &calls, &nit, &conv, &e, &fm) != 5)
                goto done;
            if (getline(&line, &cap, r) <= 0 || parse_numbers(line, x, (int)n3) != 0)
                goto done;
            res->converged = conv;
            res->force_calls = calls;
            res->energy = e;
            res->max_force = fm;
            status = 0;
            break;
        } else {
            goto done;
        }
    }
done:
    free(line);
    free(g);
    free(xq);
    if (w)
        fclose(w);
    else
        close(to_py[1]);
    if (r)
        fclose(r);
    else
        close(from_py[0]);
    int ws;
    if (waitpid(pid, &ws, 0) < 0 || !WIFEXITED(ws) || WEXITSTATUS(ws) != 0)
        status = -1;
    return status;
}
