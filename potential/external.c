/* External program as a potential: command splitting, one process per
 * evaluation through posix_spawn, a poll loop with a deadline, and a strict
 * reading of the answer. Protocol in external.h. */
#define _GNU_SOURCE /* pipe2 */
#include "potential/external.h"

#include "core/elements.h"
#include "core/units.h"

#include <cjson/cJSON.h>

#include <errno.h>
#include <fcntl.h>
#include <math.h>
#include <poll.h>
#include <pthread.h>
#include <signal.h>
#include <spawn.h>
#include <stdatomic.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <strings.h>
#include <sys/socket.h>
#include <sys/stat.h>
#include <sys/wait.h>
#include <time.h>
#include <unistd.h>

extern char **environ;

#define ANSWER_MAX ((size_t)256 << 20) /* refuse answers longer than this */
#define STDERR_KEEP 4096               /* bytes of the program's stderr kept for messages */

/* ---------------------------------------------------------- command words */

void nd_external_free_argv(char **argv)
{
    if (!argv)
        return;
    for (char **p = argv; *p; p++)
        free(*p);
    free(argv);
}

int nd_external_split(const char *command, char ***argv_out, int *argc_out, nd_error *err)
{
    if (!command || !argv_out || !argc_out)
        return nd_fail(err, ND_EINVAL, "nd_external_split: NULL argument");
    size_t len = strlen(command);
    char **argv = calloc(len / 2 + 2, sizeof *argv); /* at most (len + 1) / 2 words */
    char *word = malloc(len + 1);
    if (!argv || !word) {
        free(argv);
        free(word);
        return nd_fail(err, ND_ENOMEM, "out of memory splitting a command");
    }
    int argc = 0;
    size_t w = 0;
    int in_word = 0;
    const char *p = command;
    while (1) {
        char c = *p;
        if (c == '\0' || c == ' ' || c == '\t' || c == '\n') {
            if (in_word) {
                word[w] = '\0';
                argv[argc] = strdup(word);
                if (!argv[argc]) {
                    free(word);
                    nd_external_free_argv(argv);
                    return nd_fail(err, ND_ENOMEM, "out of memory splitting a command");
                }
                argc++;
                w = 0;
                in_word = 0;
            }
            if (c == '\0')
                break;
            p++;
        } else if (c == '\'') {
            const char *q = strchr(p + 1, '\'');
            if (!q) {
                free(word);
                nd_external_free_argv(argv);
                return nd_fail(err, ND_EINPUT, "command: unclosed ' at character %d",
                               (int)(p - command) + 1);
            }
            memcpy(word + w, p + 1, (size_t)(q - p - 1));
            w += (size_t)(q - p - 1);
            in_word = 1;
            p = q + 1;
        } else if (c == '"') {
            const char *q = p + 1;
            while (*q && *q != '"') {
                if (*q == '\\' && (q[1] == '"' || q[1] == '\\'))
                    q++;
                word[w++] = *q++;
            }
            if (*q != '"') {
                free(word);
                nd_external_free_argv(argv);
                return nd_fail(err, ND_EINPUT, "command: unclosed \" at character %d",
                               (int)(p - command) + 1);
            }
            in_word = 1;
            p = q + 1;
        } else if (c == '\\' && p[1]) {
            word[w++] = p[1];
            in_word = 1;
            p += 2;
        } else {
            word[w++] = c;
            in_word = 1;
            p++;
        }
    }
    free(word);
    if (argc == 0) {
        free(argv);
        return nd_fail(err, ND_EINPUT, "command: empty (expected a program and its arguments)");
    }
    argv[argc] = NULL;
    *argv_out = argv;
    *argc_out = argc;
    return ND_OK;
}

/* Full path of the program named by word: word itself when it holds a '/',
 * else the first executable regular file of that name in PATH. malloc'd;
 * NULL with an error when none is found. */
static char *find_program(const char *word, nd_error *err)
{
    struct stat st;
    if (strchr(word, '/')) {
        if (stat(word, &st) != 0 || !S_ISREG(st.st_mode) || access(word, X_OK) != 0) {
            nd_fail(err, ND_EEXTERNAL, "external program '%s': %s", word,
                    stat(word, &st) != 0 ? strerror(errno) : "not an executable file");
            return NULL;
        }
        char *r = strdup(word);
        if (!r)
            nd_fail(err, ND_ENOMEM, "out of memory");
        return r;
    }
    const char *path = getenv("PATH");
    if (!path || !*path)
        path = "/usr/local/bin:/usr/bin:/bin";
    size_t wl = strlen(word);
    while (*path) {
        const char *end = strchr(path, ':');
        size_t dl = end ? (size_t)(end - path) : strlen(path);
        char *cand = malloc(dl + wl + 3);
        if (!cand) {
            nd_fail(err, ND_ENOMEM, "out of memory");
            return NULL;
        }
        if (dl == 0)
            snprintf(cand, dl + wl + 3, "./%s", word);
        else
            snprintf(cand, dl + wl + 3, "%.*s/%s", (int)dl, path, word);
        if (stat(cand, &st) == 0 && S_ISREG(st.st_mode) && access(cand, X_OK) == 0)
            return cand;
        free(cand);
        if (!end)
            break;
        path = end + 1;
    }
    nd_fail(err, ND_EEXTERNAL, "external program '%s': not found in PATH", word);
    return NULL;
}

/* ------------------------------------------------------------- the handle */

struct nd_external {
    char **argv;
    char *program;   /* resolved path of argv[0] */
    int n;
    int *z;
    int charge, multiplicity;
    double timeout;
    atomic_long calls;
    pthread_mutex_t lock; /* guards last */
    nd_error last;
};

int nd_external_new(nd_external **out, const char *command, int n, const int *z, int charge,
                    int multiplicity, double timeout, nd_error *err)
{
    if (!out || !command || !z || n <= 0)
        return nd_fail(err, ND_EINVAL, "nd_external_new: needs a command and at least one atom");
    *out = NULL;
    if (!(timeout > 0))
        return nd_fail(err, ND_EINVAL, "external program: the timeout must be positive");
    if (multiplicity < 1)
        return nd_fail(err, ND_EINVAL, "external program: multiplicity must be at least 1");
    for (int i = 0; i < n; i++)
        if (z[i] < 1 || z[i] > ND_MAX_Z)
            return nd_fail(err, ND_EINVAL, "external program: atom %d has atomic number %d", i + 1,
                           z[i]);
    nd_external *e = calloc(1, sizeof *e);
    if (!e)
        return nd_fail(err, ND_ENOMEM, "out of memory");
    int argc;
    int s = nd_external_split(command, &e->argv, &argc, err);
    if (s != ND_OK) {
        free(e);
        return s;
    }
    e->program = find_program(e->argv[0], err);
    e->z = malloc((size_t)n * sizeof *e->z);
    if (!e->program || !e->z) {
        s = e->program ? nd_fail(err, ND_ENOMEM, "out of memory") : (err ? (int)err->code : ND_EEXTERNAL);
        nd_external_free_argv(e->argv);
        free(e->program);
        free(e->z);
        free(e);
        return s;
    }
    memcpy(e->z, z, (size_t)n * sizeof *z);
    e->n = n;
    e->charge = charge;
    e->multiplicity = multiplicity;
    e->timeout = timeout;
    atomic_init(&e->calls, 0);
    pthread_mutex_init(&e->lock, NULL);
    nd_error_clear(&e->last);
    *out = e;
    return ND_OK;
}

void nd_external_free(nd_external *ext)
{
    if (!ext)
        return;
    nd_external_free_argv(ext->argv);
    free(ext->program);
    free(ext->z);
    pthread_mutex_destroy(&ext->lock);
    free(ext);
}

long nd_external_calls(const nd_external *ext)
{
    return atomic_load(&((nd_external *)ext)->calls);
}

/* --------------------------------------------------------------- buffers */

typedef struct buf {
    char *s;
    size_t n, cap;
} buf;

/* Appends n bytes; -1 on no memory. */
static int buf_put(buf *b, const char *s, size_t n)
{
    if (b->n + n + 1 > b->cap) {
        size_t cap = b->cap ? b->cap : 1024;
        while (cap < b->n + n + 1)
            cap *= 2;
        char *ns = realloc(b->s, cap);
        if (!ns)
            return -1;
        b->s = ns;
        b->cap = cap;
    }
    memcpy(b->s + b->n, s, n);
    b->n += n;
    b->s[b->n] = '\0';
    return 0;
}

static int buf_str(buf *b, const char *s) { return buf_put(b, s, strlen(s)); }

/* The request object for coordinates x. */
static int build_request(const nd_external *e, const double *x, int want_gradient, buf *b)
{
    char t[96];
    int r = buf_str(b, "{\"protocol\": \"nadir-external/1\", \"want\": ");
    r |= buf_str(b, want_gradient ? "[\"energy\", \"gradient\"]" : "[\"energy\"]");
    r |= buf_str(b, ", \"elements\": [");
    for (int i = 0; i < e->n; i++) {
        snprintf(t, sizeof t, "%s\"%s\"", i ? ", " : "", nd_element_symbol(e->z[i]));
        r |= buf_str(b, t);
    }
    r |= buf_str(b, "], \"coordinates\": [");
    for (int i = 0; i < e->n; i++) {
        snprintf(t, sizeof t, "%s[%.17g, %.17g, %.17g]", i ? ", " : "", x[3 * i], x[3 * i + 1],
                 x[3 * i + 2]);
        r |= buf_str(b, t);
    }
    snprintf(t, sizeof t, "], \"coordinate_unit\": \"angstrom\", \"charge\": %d, \"multiplicity\": %d}\n",
             e->charge, e->multiplicity);
    r |= buf_str(b, t);
    return r;
}

/* The last lines of the program's standard error (at most about 300
 * characters, newlines shown as " | "), for messages. */
static void stderr_tail(const char *s, size_t n, char *out, size_t nout)
{
    while (n > 0 && (s[n - 1] == '\n' || s[n - 1] == '\r' || s[n - 1] == ' '))
        n--;
    size_t start = n > 300 ? n - 300 : 0;
    int lines = 0;
    for (size_t i = n; i > start; i--)
        if (s[i - 1] == '\n' && ++lines == 4) {
            start = i;
            break;
        }
    size_t k = 0;
    for (size_t i = start; i < n && k + 4 < nout; i++) {
        unsigned char c = (unsigned char)s[i];
        if (c == '\n') {
            memcpy(out + k, " | ", 3);
            k += 3;
        } else {
            out[k++] = (c < 32 || c == 127) ? ' ' : (char)c;
        }
    }
    out[k] = '\0';
}

static double now_seconds(void)
{
    struct timespec t;
    clock_gettime(CLOCK_MONOTONIC, &t);
    return (double)t.tv_sec + 1e-9 * (double)t.tv_nsec;
}

static void set_nonblock(int fd)
{
    int fl = fcntl(fd, F_GETFL);
    if (fl >= 0)
        fcntl(fd, F_SETFL, fl | O_NONBLOCK);
}

/* ------------------------------------------------------------ one process */

/* Outcome of one run of the program. */
typedef struct run_result {
    buf out;                  /* standard output */
    char err[STDERR_KEEP];    /* last bytes of standard error, in order */
    size_t nerr;
    int status;               /* waitpid status */
    int timed_out, too_long;
} run_result;

/* Keeps the last STDERR_KEEP bytes of the stream in r->err. */
static void keep_stderr(run_result *r, const char *s, size_t n)
{
    if (n >= STDERR_KEEP) {
        memcpy(r->err, s + n - STDERR_KEEP, STDERR_KEEP);
        r->nerr = STDERR_KEEP;
        return;
    }
    if (r->nerr + n > STDERR_KEEP) {
        size_t drop = r->nerr + n - STDERR_KEEP;
        memmove(r->err, r->err + drop, r->nerr - drop);
        r->nerr -= drop;
    }
    memcpy(r->err + r->nerr, s, n);
    r->nerr += n;
}

/* Runs the program with request on its stdin, collecting stdout and stderr
 * until both close and the process exits, or the timeout passes (then the
 * process group is killed). Returns ND_OK with *r filled, or an error when
 * the process could not be started. */
static int run_program(nd_external *e, const buf *request, run_result *r, nd_error *err)
{
    int in[2] = {-1, -1}, out[2] = {-1, -1}, errp[2] = {-1, -1};
    /* stdin is a socket so that writing to a program that has exited gives
     * EPIPE (MSG_NOSIGNAL) instead of a SIGPIPE that would kill us. */
    if (socketpair(AF_UNIX, SOCK_STREAM | SOCK_CLOEXEC, 0, in) < 0 || pipe2(out, O_CLOEXEC) < 0 ||
        pipe2(errp, O_CLOEXEC) < 0) {
        int en = errno;
        for (int i = 0; i < 2; i++) {
            if (in[i] >= 0)
                close(in[i]);
            if (out[i] >= 0)
                close(out[i]);
            if (errp[i] >= 0)
                close(errp[i]);
        }
        return nd_fail(err, ND_EEXTERNAL, "external program '%s': cannot make pipes: %s",
                       e->argv[0], strerror(en));
    }
    posix_spawn_file_actions_t fa;
    posix_spawnattr_t at;
    posix_spawn_file_actions_init(&fa);
    posix_spawn_file_actions_adddup2(&fa, in[1], 0);
    posix_spawn_file_actions_adddup2(&fa, out[1], 1);
    posix_spawn_file_actions_adddup2(&fa, errp[1], 2);
    posix_spawnattr_init(&at);
    sigset_t none, def;
    sigemptyset(&none);
    sigemptyset(&def);
    sigaddset(&def, SIGPIPE);
    posix_spawnattr_setsigmask(&at, &none);
    posix_spawnattr_setsigdefault(&at, &def);
    posix_spawnattr_setpgroup(&at, 0);
    posix_spawnattr_setflags(&at, POSIX_SPAWN_SETPGROUP | POSIX_SPAWN_SETSIGMASK |
                                      POSIX_SPAWN_SETSIGDEF);
    pid_t pid;
    int se = posix_spawn(&pid, e->program, &fa, &at, e->argv, environ);
    posix_spawn_file_actions_destroy(&fa);
    posix_spawnattr_destroy(&at);
    close(in[1]);
    close(out[1]);
    close(errp[1]);
    if (se != 0) {
        close(in[0]);
        close(out[0]);
        close(errp[0]);
        return nd_fail(err, ND_EEXTERNAL, "external program '%s': cannot start: %s", e->argv[0],
                       strerror(se));
    }
    atomic_fetch_add(&e->calls, 1);
    set_nonblock(in[0]);
    set_nonblock(out[0]);
    set_nonblock(errp[0]);

    double deadline = now_seconds() + e->timeout;
    size_t sent = 0;
    int fin = in[0], fout = out[0], ferr = errp[0];
    char chunk[65536];
    while (fout >= 0 || ferr >= 0) {
        struct pollfd pf[3];
        int np = 0, iin = -1, iout = -1, ierr = -1;
        if (fin >= 0) {
            pf[np] = (struct pollfd){fin, POLLOUT, 0};
            iin = np++;
        }
        if (fout >= 0) {
            pf[np] = (struct pollfd){fout, POLLIN, 0};
            iout = np++;
        }
        if (ferr >= 0) {
            pf[np] = (struct pollfd){ferr, POLLIN, 0};
            ierr = np++;
        }
        double left = deadline - now_seconds();
        if (left <= 0) {
            r->timed_out = 1;
            break;
        }
        int ms = left > 1000.0 ? 1000000 : (int)(left * 1000.0) + 1;
        int pr = poll(pf, (nfds_t)np, ms);
        if (pr < 0) {
            if (errno == EINTR)
                continue;
            break;
        }
        if (iin >= 0 && pf[iin].revents) {
            ssize_t k = send(fin, request->s + sent, request->n - sent, MSG_NOSIGNAL | MSG_DONTWAIT);
            if (k > 0)
                sent += (size_t)k;
            if (k < 0 && errno != EAGAIN && errno != EINTR)
                sent = request->n; /* the program closed its input: read what it says */
            if (sent == request->n) {
                close(fin);
                fin = -1;
            }
        }
        if (iout >= 0 && pf[iout].revents) {
            ssize_t k = read(fout, chunk, sizeof chunk);
            if (k > 0) {
                if (r->out.n + (size_t)k > ANSWER_MAX) {
                    r->too_long = 1;
                    break;
                }
                if (buf_put(&r->out, chunk, (size_t)k) < 0) {
                    r->too_long = 1;
                    break;
                }
            } else if (k == 0 || (errno != EAGAIN && errno != EINTR)) {
                close(fout);
                fout = -1;
            }
        }
        if (ierr >= 0 && pf[ierr].revents) {
            ssize_t k = read(ferr, chunk, sizeof chunk);
            if (k > 0)
                keep_stderr(r, chunk, (size_t)k);
            else if (k == 0 || (errno != EAGAIN && errno != EINTR)) {
                close(ferr);
                ferr = -1;
            }
        }
    }
    if (fin >= 0)
        close(fin);
    if (fout >= 0)
        close(fout);
    if (ferr >= 0)
        close(ferr);
    /* Wait for the exit, still bounded by the deadline. */
    int st = 0;
    while (!r->timed_out && !r->too_long) {
        pid_t w = waitpid(pid, &st, WNOHANG);
        if (w == pid)
            break;
        if (w < 0 && errno != EINTR) {
            st = 0;
            break;
        }
        if (now_seconds() >= deadline) {
            r->timed_out = 1;
            break;
        }
        struct timespec ts = {0, 2000000};
        nanosleep(&ts, NULL);
    }
    if (r->timed_out || r->too_long) {
        kill(-pid, SIGKILL); /* the whole group: the program and anything it started */
        kill(pid, SIGKILL);
        while (waitpid(pid, &st, 0) < 0 && errno == EINTR)
            ;
    }
    r->status = st;
    return ND_OK;
}

/* ------------------------------------------------------------- the answer */

/* Factor from an energy unit name to kcal/mol; 0 if unknown. */
static double energy_unit(const char *u, size_t n)
{
    static const struct {
        const char *name;
        double f;
    } t[] = {{"hartree", ND_HARTREE_KCALMOL}, {"kcal/mol", 1.0}, {"kJ/mol", ND_KJMOL_KCALMOL},
             {"eV", ND_EV_KCALMOL}};
    for (size_t i = 0; i < sizeof t / sizeof t[0]; i++)
        if (strlen(t[i].name) == n && strncasecmp(u, t[i].name, n) == 0)
            return t[i].f;
    return 0.0;
}

/* Factor from a gradient unit ENERGY/LENGTH to kcal/mol/angstrom; 0 if unknown. */
static double gradient_unit(const char *u)
{
    const char *slash = strrchr(u, '/');
    if (!slash)
        return 0.0;
    double fe = energy_unit(u, (size_t)(slash - u));
    double fl = !strcasecmp(slash + 1, "angstrom") ? 1.0
                : !strcasecmp(slash + 1, "bohr")   ? ND_BOHR_ANGSTROM
                                                   : 0.0;
    return fe > 0 && fl > 0 ? fe / fl : 0.0;
}

/* The first characters of the answer, printable, for messages. */
static void answer_head(const buf *b, char *out, size_t nout)
{
    size_t k = 0, i = 0, n = b->n;
    while (n > 0 && (b->s[n - 1] == ' ' || b->s[n - 1] == '\n' || b->s[n - 1] == '\t' || b->s[n - 1] == '\r'))
        n--;
    while (i < n && (b->s[i] == ' ' || b->s[i] == '\n' || b->s[i] == '\t' || b->s[i] == '\r'))
        i++;
    for (; i < n && k + 4 < nout && k < 60; i++) {
        unsigned char c = (unsigned char)b->s[i];
        out[k++] = (c < 32 || c >= 127) ? '.' : (char)c;
    }
    if (i < n && k + 4 < nout) {
        memcpy(out + k, "...", 3);
        k += 3;
    }
    out[k] = '\0';
}

/* Reads the answer into energy and g (may be NULL). */
static int read_answer(nd_external *e, const buf *b, int exited_ok, double *energy, double *g,
                       const char *why_failed, nd_error *err)
{
    const char *name = e->argv[0];
    cJSON *o = b->n ? cJSON_ParseWithLength(b->s, b->n) : NULL;
    int status = ND_OK;
    if (o && cJSON_IsObject(o)) {
        const cJSON *msg = cJSON_GetObjectItemCaseSensitive(o, "error");
        if (msg) {
            status = nd_fail(err, ND_EEXTERNAL, "external program '%s' reported an error: %.300s",
                             name, cJSON_IsString(msg) ? msg->valuestring : "(no message)");
            goto done;
        }
    }
    if (!exited_ok) {
        status = nd_fail(err, ND_EEXTERNAL, "external program '%s' %s", name, why_failed);
        goto done;
    }
    if (!o || !cJSON_IsObject(o)) {
        char head[80];
        answer_head(b, head, sizeof head);
        status = nd_fail(err, ND_EEXTERNAL,
                         "external program '%s' answered %s (expected one JSON object with "
                         "\"energy\" and \"energy_unit\"): \"%s\"",
                         name, b->n == 0 ? "nothing" : o ? "JSON that is not an object" : "something that is not JSON",
                         head);
        goto done;
    }
    const cJSON *en = cJSON_GetObjectItemCaseSensitive(o, "energy");
    const cJSON *eu = cJSON_GetObjectItemCaseSensitive(o, "energy_unit");
    if (!cJSON_IsNumber(en)) {
        status = nd_fail(err, ND_EEXTERNAL, "external program '%s': answer has %s", name,
                         en ? "an \"energy\" that is not a number" : "no \"energy\"");
        goto done;
    }
    if (!isfinite(en->valuedouble)) {
        status = nd_fail(err, ND_EEXTERNAL, "external program '%s': energy is not finite", name);
        goto done;
    }
    double fe = cJSON_IsString(eu) ? energy_unit(eu->valuestring, strlen(eu->valuestring)) : 0.0;
    if (fe == 0.0) {
        status = nd_fail(err, ND_EEXTERNAL,
                         "external program '%s': %s energy_unit (expected hartree, kcal/mol, "
                         "kJ/mol or eV)",
                         name, eu ? "unknown" : "answer has no");
        goto done;
    }
    *energy = en->valuedouble * fe;
    if (g) {
        const cJSON *gr = cJSON_GetObjectItemCaseSensitive(o, "gradient");
        const cJSON *gu = cJSON_GetObjectItemCaseSensitive(o, "gradient_unit");
        if (!cJSON_IsArray(gr)) {
            status = nd_fail(err, ND_EEXTERNAL, "external program '%s': answer has %s", name,
                             gr ? "a \"gradient\" that is not an array" : "no \"gradient\"");
            goto done;
        }
        double fg = cJSON_IsString(gu) ? gradient_unit(gu->valuestring) : 0.0;
        if (fg == 0.0) {
            status = nd_fail(err, ND_EEXTERNAL,
                             "external program '%s': %s gradient_unit (expected ENERGY/LENGTH, "
                             "such as hartree/bohr or eV/angstrom)",
                             name, gu ? "unknown" : "answer has no");
            goto done;
        }
        int len = cJSON_GetArraySize(gr);
        int nested = gr->child && cJSON_IsArray(gr->child);
        if ((nested && len != e->n) || (!nested && len != 3 * e->n)) {
            status = nd_fail(err, ND_EEXTERNAL,
                             "external program '%s': gradient has %d %s for %d atoms (expected %d)",
                             name, len, nested ? "triples" : "numbers", e->n,
                             nested ? e->n : 3 * e->n);
            goto done;
        }
        int k = 0;
        for (const cJSON *v = gr->child; v; v = v->next) {
            if (nested) {
                if (!cJSON_IsArray(v) || cJSON_GetArraySize(v) != 3) {
                    status = nd_fail(err, ND_EEXTERNAL,
                                     "external program '%s': gradient of atom %d is not three numbers",
                                     name, k / 3 + 1);
                    goto done;
                }
                for (const cJSON *c = v->child; c; c = c->next, k++) {
                    if (!cJSON_IsNumber(c) || !isfinite(c->valuedouble)) {
                        status = nd_fail(err, ND_EEXTERNAL,
                                         "external program '%s': gradient of atom %d is not finite",
                                         name, k / 3 + 1);
                        goto done;
                    }
                    g[k] = c->valuedouble * fg;
                }
            } else {
                if (!cJSON_IsNumber(v) || !isfinite(v->valuedouble)) {
                    status = nd_fail(err, ND_EEXTERNAL,
                                     "external program '%s': gradient of atom %d is not finite", name,
                                     k / 3 + 1);
                    goto done;
                }
                g[k++] = v->valuedouble * fg;
            }
        }
    }
done:
    cJSON_Delete(o);
    return status;
}

int nd_external_eval(nd_external *ext, const double *x, double *energy, double *g, nd_error *err)
{
    if (!ext || !x || !energy)
        return nd_fail(err, ND_EINVAL, "nd_external_eval: NULL argument");
    for (int i = 0; i < 3 * ext->n; i++)
        if (!isfinite(x[i]))
            return nd_fail(err, ND_ECOMPUTE, "external program: atom %d has a non-finite coordinate",
                           i / 3 + 1);
    buf req = {0};
    if (build_request(ext, x, g != NULL, &req) != 0) {
        free(req.s);
        return nd_fail(err, ND_ENOMEM, "out of memory");
    }
    run_result *r = calloc(1, sizeof *r);
    if (!r) {
        free(req.s);
        return nd_fail(err, ND_ENOMEM, "out of memory");
    }
    int status = run_program(ext, &req, r, err);
    free(req.s);
    if (status != ND_OK) {
        free(r->out.s);
        free(r);
        return status;
    }
    char tail[400], why[600];
    stderr_tail(r->err, r->nerr, tail, sizeof tail);
    if (r->timed_out) {
        status = nd_fail(err, ND_EEXTERNAL,
                         "external program '%s' gave no answer within %g s and was stopped%s%s",
                         ext->argv[0], ext->timeout, tail[0] ? "; its stderr ends: " : "", tail);
    } else if (r->too_long) {
        status = nd_fail(err, ND_EEXTERNAL, "external program '%s' answered more than %zu MB",
                         ext->argv[0], ANSWER_MAX >> 20);
    } else {
        int ok = WIFEXITED(r->status) && WEXITSTATUS(r->status) == 0;
        if (WIFSIGNALED(r->status))
            snprintf(why, sizeof why, "was killed by signal %d (%s)%s%s", WTERMSIG(r->status),
                     strsignal(WTERMSIG(r->status)), tail[0] ? "; its stderr ends: " : "", tail);
        else
            snprintf(why, sizeof why, "exited with status %d%s%s", WEXITSTATUS(r->status),
                     tail[0] ? "; its stderr ends: " : "", tail);
        status = read_answer(ext, &r->out, ok, energy, g, why, err);
    }
    free(r->out.s);
    free(r);
    return status;
}

/* nd_energy_fn adapter: keeps the message of a failure in the handle. */
static int external_fn(void *ctx, int n, const double *x, double *energy, double *g)
{
    nd_external *ext = ctx;
    nd_error err;
    nd_error_clear(&err);
    int s = n != ext->n ? nd_fail(&err, ND_EINVAL,
                                  "external program: called with %d atoms, set up for %d", n, ext->n)
                        : nd_external_eval(ext, x, energy, g, &err);
    if (s != ND_OK) {
        pthread_mutex_lock(&ext->lock);
        ext->last = err;
        pthread_mutex_unlock(&ext->lock);
    }
    return s;
}

nd_energy nd_external_energy(nd_external *ext)
{
    nd_energy p = {external_fn, NULL, ext};
    return p;
}

void nd_external_last_error(nd_external *ext, nd_error *err)
{
    if (!err)
        return;
    pthread_mutex_lock(&ext->lock);
    *err = ext->last;
    pthread_mutex_unlock(&ext->lock);
}
