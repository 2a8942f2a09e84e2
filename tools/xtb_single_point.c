/* xtb-single-point, compiled: the same wrapper as the Python script
 * tools/xtb-single-point (same request, same program call, same answer, same
 * messages), without an interpreter's start-up. The reference labelling runs
 * one single point per structure; on this machine the Python wrapper's
 * start-up and imports cost about as much as the method itself on a
 * 25-atom molecule, so this version labels about twice as fast.
 *
 * Reads one request object from standard input:
 *   {"protocol": "nadir-external/1", "want": ["energy", "gradient"],
 *    "elements": ["O", "H", "H"], "coordinates": [[x, y, z], ...],
 *    "coordinate_unit": "angstrom", "charge": 0, "multiplicity": 1}
 * and writes one answer object to standard output:
 *   {"energy": E, "energy_unit": "hartree",
 *    "gradient": [[gx, gy, gz], ...], "gradient_unit": "hartree/bohr"}
 * Numbers are written with 17 significant digits, so they read back to the
 * same doubles and the labels are the same bit for bit as the Python
 * wrapper's (cJSON's own printer may drop the last bit). Built by `make` as
 * build/xtb-single-point; tools/make-dataset.sh uses it when it is there. */
#define _XOPEN_SOURCE 700 /* nftw */
#include <cjson/cJSON.h>

#include <errno.h>
#include <fcntl.h>
#include <ftw.h>
#include <math.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <sys/wait.h>
#include <unistd.h>

static const char *const ELEMENTS[] = {
    "H",  "He", "Li", "Be", "B",  "C",  "N",  "O",  "F",  "Ne", "Na", "Mg", "Al", "Si",
    "P",  "S",  "Cl", "Ar", "K",  "Ca", "Sc", "Ti", "V",  "Cr", "Mn", "Fe", "Co", "Ni",
    "Cu", "Zn", "Ga", "Ge", "As", "Se", "Br", "Kr", "Rb", "Sr", "Y",  "Zr", "Nb", "Mo",
    "Tc", "Ru", "Rh", "Pd", "Ag", "Cd", "In", "Sn", "Sb", "Te", "I",  "Xe"};
#define NELEMENTS ((int)(sizeof ELEMENTS / sizeof ELEMENTS[0]))

static const char *USAGE =
    "usage: xtb-single-point [--xtb PATH] [--acc VALUE] [--threads N] [--keep DIR]\n"
    "\n"
    "Single-point energy and gradient from the GFN2-xTB method (Debian package\n"
    "`xtb`), answering in nadir's external-program protocol (see\n"
    "potential/external.h): one JSON request on standard input, one JSON answer\n"
    "(energy in hartree, gradient in hartree/bohr) on standard output. The method\n"
    "runs in a private temporary directory (removed afterwards) with\n"
    "`--gfn 2 --grad --chrg CHARGE --uhf (MULTIPLICITY - 1)`. Single points only.\n"
    "\n"
    "  --xtb PATH    the program to run (default: `xtb` found on PATH)\n"
    "  --acc VALUE   SCC accuracy passed as --acc (default 0.1; lower is tighter)\n"
    "  --threads N   OpenMP threads for the method (default 1: nadir runs\n"
    "                several single points in parallel instead)\n"
    "  --keep DIR    copy the working files into DIR (for debugging)\n";

/* The temporary directory, removed by fail() and at the end. */
static char g_work[4096];

static int remove_entry(const char *path, const struct stat *st, int flag, struct FTW *f)
{
    (void)st, (void)flag, (void)f;
    return remove(path);
}

static void remove_work(void)
{
    if (g_work[0])
        nftw(g_work, remove_entry, 16, FTW_DEPTH | FTW_PHYS);
    g_work[0] = '\0';
}

/* The last n lines of a file (empty string if unreadable); caller frees. */
static char *last_lines(const char *path, int n)
{
    FILE *f = fopen(path, "r");
    if (!f)
        return strdup("");
    fseek(f, 0, SEEK_END);
    long size = ftell(f);
    long from = size > 65536 ? size - 65536 : 0;
    fseek(f, from, SEEK_SET);
    char *buf = calloc((size_t)(size - from) + 1, 1);
    size_t got = buf ? fread(buf, 1, (size_t)(size - from), f) : 0;
    fclose(f);
    if (!buf)
        return strdup("");
    buf[got] = '\0';
    char *p = buf + got;
    int seen = 0;
    if (p > buf && p[-1] == '\n')
        p--;
    while (p > buf) {
        if (p[-1] == '\n' && ++seen == n)
            break;
        p--;
    }
    char *out = strdup(p);
    free(buf);
    return out;
}

static void fail_tail(const char *tail, const char *fmt, ...) __attribute__((format(printf, 2, 3)));
static void fail_tail(const char *tail, const char *fmt, ...)
{
    va_list ap;
    va_start(ap, fmt);
    fputs("xtb-single-point: ", stderr);
    vfprintf(stderr, fmt, ap);
    fputc('\n', stderr);
    va_end(ap);
    if (tail && tail[0]) {
        fputs(tail, stderr);
        if (tail[strlen(tail) - 1] != '\n')
            fputc('\n', stderr);
    }
    remove_work();
    exit(1);
}
#define fail(...) fail_tail(NULL, __VA_ARGS__)

typedef struct options {
    const char *xtb, *acc, *threads, *keep;
} options;

static options parse_args(int argc, char **argv)
{
    options o = {"xtb", "0.1", "1", NULL};
    for (int i = 1; i < argc; i++) {
        const char *a = argv[i];
        if (!strcmp(a, "-h") || !strcmp(a, "--help")) {
            fputs(USAGE, stdout);
            exit(0);
        }
        const char **slot = !strcmp(a, "--xtb")       ? &o.xtb
                            : !strcmp(a, "--acc")     ? &o.acc
                            : !strcmp(a, "--threads") ? &o.threads
                            : !strcmp(a, "--keep")    ? &o.keep
                                                      : NULL;
        if (slot && i + 1 < argc) {
            *slot = argv[++i];
            continue;
        }
        fail("unknown option '%s' (see --help)", a);
    }
    return o;
}

static char *read_all(FILE *f)
{
    size_t cap = 1 << 16, len = 0;
    char *buf = malloc(cap);
    if (!buf)
        fail("out of memory");
    size_t got;
    while ((got = fread(buf + len, 1, cap - len - 1, f)) > 0) {
        len += got;
        if (cap - len < 2) {
            char *nb = realloc(buf, cap *= 2);
            if (!nb)
                fail("out of memory");
            buf = nb;
        }
    }
    buf[len] = '\0';
    return buf;
}

static int element_number(const char *s)
{
    for (int i = 0; i < NELEMENTS; i++)
        if (!strcmp(ELEMENTS[i], s))
            return i + 1;
    return 0;
}

/* JSON integer (a number with no fractional part that fits an int). */
static int as_int(const cJSON *v, int *out)
{
    if (!cJSON_IsNumber(v) || v->valuedouble != floor(v->valuedouble) || fabs(v->valuedouble) > 1e6)
        return 0;
    *out = (int)v->valuedouble;
    return 1;
}

typedef struct request {
    int n;
    const char **el;
    double *x; /* 3n, angstrom */
    int charge, mult;
} request;

static request read_request(cJSON *req)
{
    request r = {0};
    if (!cJSON_IsObject(req))
        fail("request is not a JSON object");
    const cJSON *els = cJSON_GetObjectItemCaseSensitive(req, "elements");
    const cJSON *xyz = cJSON_GetObjectItemCaseSensitive(req, "coordinates");
    if (!cJSON_IsArray(els) || cJSON_GetArraySize(els) == 0)
        fail("request has no 'elements' list");
    r.n = cJSON_GetArraySize(els);
    if (!cJSON_IsArray(xyz) || cJSON_GetArraySize(xyz) != r.n)
        fail("request 'coordinates' must hold one [x, y, z] per element");
    const cJSON *unit = cJSON_GetObjectItemCaseSensitive(req, "coordinate_unit");
    if (unit && !(cJSON_IsString(unit) && !strcmp(unit->valuestring, "angstrom")))
        fail("only coordinates in angstrom are understood");
    r.el = calloc((size_t)r.n, sizeof *r.el);
    r.x = calloc(3 * (size_t)r.n, sizeof *r.x);
    if (!r.el || !r.x)
        fail("out of memory");
    long electrons = 0;
    int i = 0;
    const cJSON *e;
    cJSON_ArrayForEach(e, els)
    {
        int z = cJSON_IsString(e) ? element_number(e->valuestring) : 0;
        if (!z)
            fail("unknown element '%s'", cJSON_IsString(e) ? e->valuestring : "(not a string)");
        r.el[i++] = e->valuestring;
        electrons += z;
    }
    i = 0;
    const cJSON *p;
    cJSON_ArrayForEach(p, xyz)
    {
        int ok = cJSON_IsArray(p) && cJSON_GetArraySize(p) == 3;
        for (int k = 0; ok && k < 3; k++) {
            const cJSON *v = cJSON_GetArrayItem(p, k);
            ok = cJSON_IsNumber(v) && isfinite(v->valuedouble);
            if (ok)
                r.x[3 * i + k] = v->valuedouble;
        }
        if (!ok) {
            char *s = cJSON_PrintUnformatted(p);
            fail("bad coordinate triple %s", s ? s : "?");
        }
        i++;
    }
    const cJSON *c = cJSON_GetObjectItemCaseSensitive(req, "charge");
    const cJSON *m = cJSON_GetObjectItemCaseSensitive(req, "multiplicity");
    r.charge = 0, r.mult = 1;
    if ((c && !as_int(c, &r.charge)) || (m && !as_int(m, &r.mult)) || r.mult < 1)
        fail("charge must be an integer and multiplicity a positive integer");
    electrons -= r.charge;
    if (electrons < 0 || (electrons + r.mult - 1) % 2 != 0 || r.mult - 1 > electrons)
        fail("charge %d and multiplicity %d are impossible with %ld electrons", r.charge, r.mult,
             electrons);
    return r;
}

/* Runs the method in g_work; returns its exit status (or 128 + signal). */
static int run_method(const options *o, const request *r)
{
    char charge[32], uhf[32];
    snprintf(charge, sizeof charge, "%d", r->charge);
    snprintf(uhf, sizeof uhf, "%d", r->mult - 1);
    char *args[] = {(char *)o->xtb, "input.xyz", "--gfn", "2", "--grad", "--acc", (char *)o->acc,
                    "--chrg", charge, "--uhf", uhf, NULL};
    int report[2]; /* the child's exec errno, if exec fails */
    if (pipe(report) != 0)
        fail("cannot make a pipe: %s", strerror(errno));
    fcntl(report[1], F_SETFD, FD_CLOEXEC);
    fflush(NULL);
    pid_t pid = fork();
    if (pid < 0)
        fail("cannot fork: %s", strerror(errno));
    if (pid == 0) {
        close(report[0]);
        int in = open("/dev/null", O_RDONLY);
        char out_path[4200];
        snprintf(out_path, sizeof out_path, "%s/out.txt", g_work);
        int out = open(out_path, O_WRONLY | O_CREAT | O_TRUNC, 0644);
        if (in < 0 || out < 0 || chdir(g_work) != 0 || dup2(in, 0) < 0 || dup2(out, 1) < 0 ||
            dup2(out, 2) < 0) {
            int e = errno;
            (void)!write(report[1], &e, sizeof e);
            _exit(127);
        }
        setenv("OMP_NUM_THREADS", o->threads, 1);
        /* xtb links OpenBLAS, which would start its own threads */
        setenv("OPENBLAS_NUM_THREADS", o->threads, 1);
        setenv("MKL_NUM_THREADS", o->threads, 1);
        setenv("OMP_STACKSIZE", "500M", 0);
        execvp(o->xtb, args);
        int e = errno;
        (void)!write(report[1], &e, sizeof e);
        _exit(127);
    }
    close(report[1]);
    int child_errno = 0;
    ssize_t got = read(report[0], &child_errno, sizeof child_errno);
    close(report[0]);
    int status;
    while (waitpid(pid, &status, 0) < 0)
        if (errno != EINTR)
            fail("cannot wait for '%s': %s", o->xtb, strerror(errno));
    if (got == (ssize_t)sizeof child_errno)
        fail("cannot run '%s': %s", o->xtb, strerror(child_errno));
    return WIFEXITED(status) ? WEXITSTATUS(status) : 128 + WTERMSIG(status);
}

/* Reads one number written with a Fortran D or E exponent. */
static int parse_fortran(const char *s, char **end, double *v)
{
    char buf[64];
    size_t k = 0;
    while (*s == ' ' || *s == '\t')
        s++;
    const char *t = s;
    while (*t && *t != ' ' && *t != '\t' && *t != '\n' && k + 1 < sizeof buf) {
        buf[k++] = (*t == 'D' || *t == 'd') ? 'E' : *t;
        t++;
    }
    buf[k] = '\0';
    char *e;
    *v = strtod(buf, &e);
    *end = (char *)t;
    return k > 0 && *e == '\0';
}

/* Energy (hartree) and gradient (hartree/bohr, 3n) from the $grad block the
 * method writes: a header line with the energy, n coordinate lines, then n
 * gradient lines. The last cycle in the file is taken (a fresh directory has
 * one). */
static void parse_gradient(const char *path, int n, double *energy, double *g)
{
    FILE *f = fopen(path, "r");
    if (!f)
        fail("the method wrote no gradient file ([Errno %d] %s: '%s')", errno, strerror(errno), path);
    char *text = read_all(f);
    fclose(f);
    /* split into lines in place */
    size_t nl = 1;
    for (char *p = text; *p; p++)
        nl += *p == '\n';
    char **line = malloc(nl * sizeof *line);
    if (!line)
        fail("out of memory");
    size_t L = 0;
    for (char *p = text;;) {
        line[L++] = p;
        char *q = strchr(p, '\n');
        if (!q)
            break;
        *q = '\0';
        p = q + 1;
    }
    size_t start = L;
    for (size_t i = 0; i < L && start == L; i++) {
        const char *s = line[i];
        while (*s == ' ' || *s == '\t')
            s++;
        if (!strncmp(s, "$grad", 5))
            start = i;
    }
    if (start == L)
        fail("gradient file has no $grad block");
    size_t h = L;
    for (size_t i = start; i < L; i++)
        if (strstr(line[i], "SCF energy"))
            h = i;
    if (h == L)
        fail("gradient file has no energy line");
    const char *eq = strstr(line[h], "SCF energy =");
    char *end;
    if (!eq || !parse_fortran(eq + strlen("SCF energy ="), &end, energy))
        fail("cannot parse the gradient file: no number after 'SCF energy ='");
    int have = 0;
    for (size_t i = h + 1 + (size_t)n; i < L && i < h + 1 + 2 * (size_t)n; i++) {
        const char *s = line[i];
        int k = 0;
        double v;
        while (k < 3 && parse_fortran(s, &end, &v)) {
            g[3 * have + k++] = v;
            s = end;
        }
        while (*s == ' ' || *s == '\t')
            s++;
        if (k != 3 || *s)
            fail("cannot parse the gradient file: line %zu is not three numbers", i + 1);
        have++;
    }
    if (have != n)
        fail("gradient file holds %d gradient lines, expected %d", have, n);
    int finite = isfinite(*energy);
    for (int i = 0; i < 3 * n; i++)
        finite = finite && isfinite(g[i]);
    if (!finite)
        fail("the method returned non-finite numbers");
    free(line);
    free(text);
}

/* Copies the (flat) working directory's files into dir, made if missing. */
static void keep_files(const char *dir)
{
    mkdir(dir, 0755);
    char cmd_src[4200];
    snprintf(cmd_src, sizeof cmd_src, "%s/.", g_work);
    pid_t pid = fork();
    if (pid == 0) {
        execlp("cp", "cp", "-r", cmd_src, dir, (char *)NULL);
        _exit(127);
    }
    int status;
    if (pid < 0 || waitpid(pid, &status, 0) < 0 || !WIFEXITED(status) || WEXITSTATUS(status))
        fail("cannot copy the working files into %s", dir);
}

int main(int argc, char **argv)
{
    options o = parse_args(argc, argv);
    char *text = read_all(stdin);
    cJSON *req = cJSON_Parse(text);
    if (!req)
        fail("request is not JSON: parse error near byte %ld",
             (long)(cJSON_GetErrorPtr() ? cJSON_GetErrorPtr() - text : 0));
    request r = read_request(req);

    const char *tmp = getenv("TMPDIR");
    snprintf(g_work, sizeof g_work, "%s/xtb-sp-XXXXXX", tmp && tmp[0] ? tmp : "/tmp");
    if (!mkdtemp(g_work)) {
        int e = errno;
        g_work[0] = '\0';
        fail("cannot make a temporary directory: %s", strerror(e));
    }
    char path[4200];
    snprintf(path, sizeof path, "%s/input.xyz", g_work);
    FILE *f = fopen(path, "w");
    if (!f)
        fail("cannot write %s: %s", path, strerror(errno));
    fprintf(f, "%d\nnadir single point\n", r.n);
    for (int i = 0; i < r.n; i++)
        fprintf(f, "%-2s %20.12f %20.12f %20.12f\n", r.el[i], r.x[3 * i], r.x[3 * i + 1],
                r.x[3 * i + 2]);
    if (fclose(f) != 0)
        fail("cannot write %s", path);

    int rc = run_method(&o, &r);
    if (rc != 0) {
        snprintf(path, sizeof path, "%s/out.txt", g_work);
        char *tail = last_lines(path, 12);
        fail_tail(tail, "the method exited with status %d", rc);
    }
    double energy, *g = malloc(3 * (size_t)r.n * sizeof *g);
    if (!g)
        fail("out of memory");
    snprintf(path, sizeof path, "%s/gradient", g_work);
    parse_gradient(path, r.n, &energy, g);
    if (o.keep)
        keep_files(o.keep);
    remove_work();

    printf("{\"energy\": %.17g, \"energy_unit\": \"hartree\", \"gradient\": [", energy);
    for (int i = 0; i < r.n; i++)
        printf("%s[%.17g, %.17g, %.17g]", i ? ", " : "", g[3 * i], g[3 * i + 1], g[3 * i + 2]);
    printf("], \"gradient_unit\": \"hartree/bohr\"}\n");
    cJSON_Delete(req);
    free(g), free(r.el), free(r.x), free(text);
    return fflush(stdout) == 0 ? 0 : 1;
}
