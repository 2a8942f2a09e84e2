/* nadir label: reference energies and forces for every structure of a
 * molecule file from an external program, appended to a JSON Lines dataset
 * as they arrive, resumable, with an optional audit of the program's
 * gradients against finite differences of its own energies. */
#include "cli/cli.h"

#include <getopt.h>
#include <math.h>
#include <omp.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

static const char *CMD = "label";

/* Defaults, explained in the usage text. */
#define DEFAULT_TIMEOUT 600.0      /* s per program run */
#define DEFAULT_NUDGE 1e-3         /* angstrom, standard deviation per coordinate */
#define DEFAULT_AUDIT_STEP 2e-3    /* angstrom */
#define DEFAULT_AUDIT_TOL 0.5      /* kcal/mol/angstrom */
#define PLANAR_RMS 1e-3            /* angstrom: RMS distance from the best plane below this is planar */
#define COINCIDENT 1e-6            /* angstrom: two atoms closer than this along an axis share it */
#define MIN_DISTANCE 0.3          /* angstrom: closer atoms mean a broken structure */
#define GIVE_UP_AFTER 5            /* failures in a row, before any success, that stop the run */

typedef struct {
    const char *input, *output, *command, *key_data, *tag, *source;
    int threads, audit, seed_given;
    double timeout, nudge, audit_step, audit_tol;
    unsigned long long seed;
} label_options;

static void usage(FILE *f)
{
    fprintf(f,
            "usage: nadir label IN -o DATA.jsonl --potential-command CMD [options]\n"
            "\n"
            "Computes a reference energy and gradient for every structure of IN with an\n"
            "external program and appends one line per structure to the dataset DATA.jsonl\n"
            "(energies in kcal/mol, forces in kcal/mol/angstrom, see the dataset format in\n"
            "potential/dataset.h). Lines are written and flushed as results arrive, in input\n"
            "order. Run the same command again after an interruption: structures already in\n"
            "DATA.jsonl (same elements, coordinates, charge and multiplicity, recognised by\n"
            "the \"id\" stored in each line) are skipped, a partial last line is cut off, and\n"
            "nothing is labelled twice.\n"
            "\n"
            "The program gets one JSON request on stdin per structure and answers JSON on\n"
            "stdout (the protocol is described in potential/external.h). CMD is split into\n"
            "words at spaces; '...' and \"...\" quote; no shell is involved.\n"
            "\n"
            "  IN                     .xyz (multi-frame) or .sdf/.sd/.mol file, '-' for stdin\n"
            "  -o, --output FILE      the dataset to append to (created with a header if new)\n"
            "  --potential-command CMD  the external program and its arguments\n"
            "  --key-from title|data:NAME  molecule key of each structure: the record's title\n"
            "                         (default) or its data item NAME\n"
            "  --threads N            program runs at a time (default: the number of cores)\n"
            "  --timeout S            seconds allowed per program run (default %g)\n"
            "  --nudge A              structures that are planar (RMS distance from their\n"
            "                         best plane below %g A) or have two atoms sharing an\n"
            "                         exact coordinate along x, y or z are displaced by\n"
            "                         Gaussian noise of A angstrom per coordinate before\n"
            "                         labelling (default %g; 0 turns it off). Some programs\n"
            "                         return wrong gradients for such exact coincidences.\n"
            "                         The stored coordinates are the displaced ones.\n"
            "  --audit N              check N structures chosen at random (half of them from\n"
            "                         the planar or coincident ones, when there are any):\n"
            "                         every gradient component against a central finite\n"
            "                         difference of the program's energies (6n extra runs)\n"
            "  --audit-step H         finite-difference step, angstrom (default %g). The\n"
            "                         error of a central difference is h^2/6 times the\n"
            "                         third derivative plus the energy noise over 2h;\n"
            "                         measured on a strained formamide with GFN2-xTB it\n"
            "                         was 0.0024, 0.0099, 0.063 and 0.25 kcal/mol/A at\n"
            "                         h = 0.001, 0.002, 0.005 and 0.01 A (pure h^2)\n"
            "  --audit-tolerance T    largest accepted |gradient - difference|,\n"
            "                         kcal/mol/angstrom (default %g); audited structures\n"
            "                         above it are refused (not written)\n"
            "  --seed S               seed of the nudges and of the audit sample (default 1)\n"
            "  --source TEXT          \"source\" of each line (default: the program's name)\n"
            "  --tag TEXT             \"tag\" of each line\n"
            "  --help                 this text\n"
            "\n"
            "The run stops early if the first %d structures all fail.\n"
            "\n"
            "examples:\n"
            "  nadir label frames.xyz -o labels.jsonl --potential-command 'tools/xtb-single-point'\n"
            "  nadir label set.sdf -o labels.jsonl --potential-command './my-ref --basis small' \\\n"
            "        --key-from data:name --threads 2 --audit 5\n"
            "\n"
            "exit: 0 every structure labelled (or already there), 5 some failed or were\n"
            "refused by the audit, 4 all that were tried failed, 3 unreadable input or dataset,\n"
            "2 usage\n",
            DEFAULT_TIMEOUT, PLANAR_RMS, DEFAULT_NUDGE, DEFAULT_AUDIT_STEP, DEFAULT_AUDIT_TOL,
            GIVE_UP_AFTER);
}

static int parse(int argc, char **argv, label_options *o)
{
    enum { O_CMD = 256, O_KEY, O_THREADS, O_TIMEOUT, O_NUDGE, O_AUDIT, O_STEP, O_TOL, O_SEED,
           O_SOURCE, O_TAG };
    static const struct option longopts[] = {{"output", required_argument, NULL, 'o'},
                                              {"potential-command", required_argument, NULL, O_CMD},
                                              {"key-from", required_argument, NULL, O_KEY},
                                              {"threads", required_argument, NULL, O_THREADS},
                                              {"timeout", required_argument, NULL, O_TIMEOUT},
                                              {"nudge", required_argument, NULL, O_NUDGE},
                                              {"audit", required_argument, NULL, O_AUDIT},
                                              {"audit-step", required_argument, NULL, O_STEP},
                                              {"audit-tolerance", required_argument, NULL, O_TOL},
                                              {"seed", required_argument, NULL, O_SEED},
                                              {"source", required_argument, NULL, O_SOURCE},
                                              {"tag", required_argument, NULL, O_TAG},
                                              {"help", no_argument, NULL, 'h'},
                                              {NULL, 0, NULL, 0}};
    memset(o, 0, sizeof *o);
    o->timeout = DEFAULT_TIMEOUT;
    o->nudge = DEFAULT_NUDGE;
    o->audit_step = DEFAULT_AUDIT_STEP;
    o->audit_tol = DEFAULT_AUDIT_TOL;
    o->seed = 1;
    opterr = 0;
    optind = 1;
    int c;
    double v;
    while ((c = getopt_long(argc, argv, ":ho:", longopts, NULL)) != -1) {
        switch (c) {
        case 'o': o->output = optarg; break;
        case O_CMD: o->command = optarg; break;
        case O_KEY:
            if (strcmp(optarg, "title") == 0)
                o->key_data = NULL;
            else if (strncmp(optarg, "data:", 5) == 0 && optarg[5])
                o->key_data = optarg + 5;
            else
                return cli_usage(CMD, "--key-from takes 'title' or 'data:NAME', not '%s'", optarg);
            break;
        case O_THREADS:
            if (cli_parse_int(optarg, &o->threads) < 0 || o->threads < 1 || o->threads > 1024)
                return cli_usage(CMD, "--threads takes a whole number from 1 to 1024, not '%s'", optarg);
            break;
        case O_AUDIT:
            if (cli_parse_int(optarg, &o->audit) < 0 || o->audit < 0)
                return cli_usage(CMD, "--audit takes a whole number >= 0, not '%s'", optarg);
            break;
        case O_TIMEOUT:
        case O_NUDGE:
        case O_STEP:
        case O_TOL:
            if (cli_parse_double(optarg, &v) < 0 || !isfinite(v) || v < 0 ||
                (v == 0 && c != O_NUDGE) || (c == O_NUDGE && v > 0.1) || (c == O_STEP && v > 0.1))
                return cli_usage(CMD, "%s takes a %s number%s, not '%s'",
                                 c == O_TIMEOUT ? "--timeout"
                                 : c == O_NUDGE ? "--nudge"
                                 : c == O_STEP  ? "--audit-step"
                                                : "--audit-tolerance",
                                 c == O_NUDGE ? "non-negative" : "positive",
                                 c == O_NUDGE || c == O_STEP ? " (at most 0.1 angstrom)" : "", optarg);
            if (c == O_TIMEOUT)
                o->timeout = v;
            else if (c == O_NUDGE)
                o->nudge = v;
            else if (c == O_STEP)
                o->audit_step = v;
            else
                o->audit_tol = v;
            break;
        case O_SEED: {
            char *end;
            o->seed = strtoull(optarg, &end, 10);
            if (!*optarg || *end || optarg[0] == '-')
                return cli_usage(CMD, "--seed takes a whole number >= 0, not '%s'", optarg);
            break;
        }
        case O_SOURCE: o->source = optarg; break;
        case O_TAG: o->tag = optarg; break;
        case 'h': usage(stdout); return -1;
        case ':': return cli_usage(CMD, "option %s needs a value", argv[optind - 1]);
        default: return cli_usage(CMD, "unknown option '%s'", argv[optind - 1]);
        }
    }
    if (argc - optind != 1)
        return cli_usage(CMD, "expected one input file, got %d", argc - optind);
    o->input = argv[optind];
    if (!o->output)
        return cli_usage(CMD, "no dataset given: add -o DATA.jsonl");
    if (!o->command)
        return cli_usage(CMD, "no program given: add --potential-command CMD");
    return 0;
}

/* One structure to label. */
typedef struct item {
    int record;          /* 1-based record number in IN */
    int natoms, charge, mult;
    int *z;
    double *x;           /* coordinates as labelled (nudged when flagged) */
    char *key;
    uint64_t id;         /* hash of the structure as read */
    int flagged;         /* planar or coincident coordinates */
    int audited;
    /* results */
    int done, status;
    double energy;
    double *g;
    double audit_worst;
    int audit_atom, audit_axis;
    char msg[ND_ERROR_MSG_MAX];
} item;

static void item_free(item *it)
{
    free(it->z);
    free(it->x);
    free(it->key);
    free(it->g);
    it->z = NULL;
    it->x = it->g = NULL;
    it->key = NULL;
}

/* RMS distance of the atoms from their best plane: the square root of the
 * smallest eigenvalue of the coordinate covariance (closed form for a
 * symmetric 3x3 matrix, O. K. Smith, Commun. ACM 4, 168, 1961). */
static double plane_rms(int n, const double *x)
{
    double c[3] = {0, 0, 0};
    for (int i = 0; i < n; i++)
        for (int k = 0; k < 3; k++)
            c[k] += x[3 * i + k] / n;
    double a[3][3] = {{0}};
    for (int i = 0; i < n; i++)
        for (int p = 0; p < 3; p++)
            for (int q = 0; q < 3; q++)
                a[p][q] += (x[3 * i + p] - c[p]) * (x[3 * i + q] - c[q]) / n;
    double p1 = a[0][1] * a[0][1] + a[0][2] * a[0][2] + a[1][2] * a[1][2];
    double q = (a[0][0] + a[1][1] + a[2][2]) / 3;
    double p2 = (a[0][0] - q) * (a[0][0] - q) + (a[1][1] - q) * (a[1][1] - q) +
                (a[2][2] - q) * (a[2][2] - q) + 2 * p1;
    double p = sqrt(p2 / 6);
    if (p < 1e-300)
        return sqrt(nd_larger(q, 0));
    double b[3][3];
    for (int i = 0; i < 3; i++)
        for (int j = 0; j < 3; j++)
            b[i][j] = (a[i][j] - (i == j ? q : 0)) / p;
    double r = (b[0][0] * (b[1][1] * b[2][2] - b[1][2] * b[2][1]) -
                b[0][1] * (b[1][0] * b[2][2] - b[1][2] * b[2][0]) +
                b[0][2] * (b[1][0] * b[2][1] - b[1][1] * b[2][0])) / 2;
    double phi = r <= -1 ? M_PI / 3 : r >= 1 ? 0 : acos(r) / 3;
    double smallest = q + 2 * p * cos(phi + 2 * M_PI / 3);
    return sqrt(nd_larger(smallest, 0));
}

/* 1 if two atoms have the same x, y or z (within COINCIDENT). Measured with
 * the packaged GFN2-xTB (xtb 6.5.1, Debian) on a formamide: when two atoms
 * shared an x coordinate exactly, the x gradient of both disagreed with
 * central differences of the energies by 7 to 250 kcal/mol/A; by 0.46 at
 * an offset of 1e-8 A; by under 0.001 at offsets of 1e-7 A and more. An
 * exactly planar structure drawn in a coordinate plane is the common case. */
static int coincident(int n, const double *x)
{
    for (int k = 0; k < 3; k++)
        for (int i = 0; i < n; i++)
            for (int j = i + 1; j < n; j++)
                if (fabs(x[3 * i + k] - x[3 * j + k]) < COINCIDENT)
                    return 1;
    return 0;
}

/* Smallest distance between two atoms (angstrom) and which atoms; a large
 * number for one atom. O(n^2), fine for molecules. */
static double closest_pair(int n, const double *x, int *a, int *b)
{
    double best = 1e300;
    *a = *b = 0;
    for (int i = 0; i < n; i++)
        for (int j = i + 1; j < n; j++) {
            double dx = x[3 * i] - x[3 * j], dy = x[3 * i + 1] - x[3 * j + 1],
                   dz = x[3 * i + 2] - x[3 * j + 2];
            double d = sqrt(dx * dx + dy * dy + dz * dz);
            if (d < best) {
                best = d;
                *a = i;
                *b = j;
            }
        }
    return best;
}

static int cmp_id(const void *a, const void *b)
{
    uint64_t x = (*(item *const *)a)->id, y = (*(item *const *)b)->id;
    if (x != y)
        return x < y ? -1 : 1;
    int ra = (*(item *const *)a)->record, rb = (*(item *const *)b)->record;
    return (ra > rb) - (ra < rb);
}

/* Labels one item: energy and gradient, then the audit if asked. Fills the
 * result fields; never prints. */
static void label_one(item *it, const label_options *o)
{
    nd_external *ext = NULL;
    nd_error err;
    nd_error_clear(&err);
    it->g = malloc(3 * (size_t)it->natoms * sizeof *it->g);
    if (!it->g) {
        it->status = nd_fail(&err, ND_ENOMEM, "out of memory");
        goto done;
    }
    it->status = nd_external_new(&ext, o->command, it->natoms, it->z, it->charge, it->mult,
                                 o->timeout, &err);
    if (it->status == ND_OK)
        it->status = nd_external_eval(ext, it->x, &it->energy, it->g, &err);
    if (it->status != ND_OK || !it->audited)
        goto done;
    /* Central differences: error O(h^2) from the third derivative plus the
     * program's energy noise divided by h; see the usage text. */
    double *xs = malloc(3 * (size_t)it->natoms * sizeof *xs);
    if (!xs) {
        it->status = nd_fail(&err, ND_ENOMEM, "out of memory");
        goto done;
    }
    memcpy(xs, it->x, 3 * (size_t)it->natoms * sizeof *xs);
    const double h = o->audit_step;
    it->audit_worst = 0;
    for (int i = 0; i < 3 * it->natoms && it->status == ND_OK; i++) {
        double ep, em;
        xs[i] = it->x[i] + h;
        it->status = nd_external_eval(ext, xs, &ep, NULL, &err);
        xs[i] = it->x[i] - h;
        if (it->status == ND_OK)
            it->status = nd_external_eval(ext, xs, &em, NULL, &err);
        xs[i] = it->x[i];
        if (it->status != ND_OK) {
            nd_error_prefix(&err, "audit, finite difference of coordinate %d", i + 1);
            break;
        }
        double d = fabs((ep - em) / (2 * h) - it->g[i]);
        if (d > it->audit_worst || i == 0) {
            it->audit_worst = d;
            it->audit_atom = i / 3;
            it->audit_axis = i % 3;
        }
    }
    free(xs);
    if (it->status == ND_OK && !(it->audit_worst <= o->audit_tol))
        it->status = nd_fail(&err, ND_ECOMPUTE,
                             "refused by the audit: gradient of atom %d (%c) differs from the finite "
                             "difference of the energies by %.4g kcal/mol/A (tolerance %g)",
                             it->audit_atom + 1, "xyz"[it->audit_axis], it->audit_worst, o->audit_tol);
done:
    nd_external_free(ext);
    if (it->status != ND_OK)
        snprintf(it->msg, sizeof it->msg, "%s", err.msg);
}

/* Reads every record of the input into items. Records that fail to read, or
 * have no key, are reported and counted in *failed. */
static int read_items(const label_options *o, item **out, int *nout, int *failed)
{
    nd_error err;
    nd_reader *r = NULL;
    nd_molecule mol;
    nd_molecule_init(&mol);
    item *items = NULL;
    int n = 0, cap = 0, rc = 0;
    if ((rc = cli_open_structures(CMD, o->input, ND_FORMAT_AUTO, &r)) != 0)
        goto done;
    if (nd_reader_format(r) == ND_FORMAT_SMILES) {
        rc = cli_fail(CMD, ND_EINPUT, "%s: SMILES has no coordinates; build 3D structures first",
                      o->input);
        goto done;
    }
    for (;;) {
        int s = nd_reader_next(r, &mol, &err);
        if (s == ND_END)
            break;
        if (s != ND_OK) {
            if (s != ND_EINPUT) {
                rc = cli_error(CMD, &err);
                goto done;
            }
            fprintf(stderr, "nadir %s: %s\n", CMD, err.msg);
            (*failed)++;
            continue;
        }
        int rec = nd_reader_record(r);
        const char *key = o->key_data ? nd_molecule_get_data(&mol, o->key_data) : mol.title;
        char *k = NULL;
        if (key) { /* first line of the key, trimmed */
            while (*key == ' ' || *key == '\t')
                key++;
            size_t len = strcspn(key, "\r\n");
            while (len > 0 && (key[len - 1] == ' ' || key[len - 1] == '\t'))
                len--;
            if (len > 0)
                k = strndup(key, len);
        }
        if (!k) {
            fprintf(stderr, "nadir %s: %s, record %d: no %s%s to use as the molecule key%s\n", CMD,
                    o->input, rec, o->key_data ? "data item " : "title",
                    o->key_data ? o->key_data : "",
                    o->key_data ? "" : " (use --key-from data:NAME, or give each record a title)");
            (*failed)++;
            continue;
        }
        if (mol.natoms == 0 || mol.dimension != 3) {
            fprintf(stderr, "nadir %s: %s, record %d: %s\n", CMD, o->input, rec,
                    mol.natoms == 0       ? "no atoms"
                    : mol.dimension == 2 ? "2D coordinates; build 3D structures first"
                                         : "no coordinates; build 3D structures first");
            free(k);
            (*failed)++;
            continue;
        }
        /* an impossible charge and spin, most often an ion read from XYZ
         * (which states no charge): said here, where the file is known; the
         * program decides (a model potential may not care about electrons) */
        long electrons = nd_molecule_electrons(&mol, mol.charge);
        int mult = mol.multiplicity > 0 ? mol.multiplicity : 1;
        if (electrons < 0 || (electrons + mult) % 2 == 0)
            fprintf(stderr, "nadir %s: note: %s, record %d: %ld electrons (charge %+d) cannot have "
                            "spin multiplicity %d%s\n",
                    CMD, o->input, rec, electrons, mol.charge, mult,
                    nd_reader_format(r) == ND_FORMAT_XYZ
                        ? "; an XYZ file states no charge: give ions as SD files with charges"
                        : "");
        int ca, cb;
        double dmin = closest_pair(mol.natoms, mol.xyz, &ca, &cb);
        if (dmin < MIN_DISTANCE) {
            fprintf(stderr, "nadir %s: %s, record %d: atoms %d and %d are only %.3f A apart "
                            "(at least %g expected); not labelled\n",
                    CMD, o->input, rec, ca + 1, cb + 1, dmin, MIN_DISTANCE);
            free(k);
            (*failed)++;
            continue;
        }
        if (n == cap) {
            cap = cap ? 2 * cap : 64;
            item *ni = realloc(items, (size_t)cap * sizeof *ni);
            if (!ni) {
                free(k);
                rc = cli_fail(CMD, ND_ENOMEM, "out of memory");
                goto done;
            }
            items = ni;
        }
        item *it = &items[n];
        memset(it, 0, sizeof *it);
        it->record = rec;
        it->natoms = mol.natoms;
        it->charge = mol.charge;
        it->mult = mol.multiplicity > 0 ? mol.multiplicity : 1;
        it->key = k;
        it->z = malloc((size_t)mol.natoms * sizeof *it->z);
        it->x = malloc(3 * (size_t)mol.natoms * sizeof *it->x);
        n++;
        if (!it->z || !it->x) {
            rc = cli_fail(CMD, ND_ENOMEM, "out of memory");
            goto done;
        }
        memcpy(it->z, mol.z, (size_t)mol.natoms * sizeof *it->z);
        memcpy(it->x, mol.xyz, 3 * (size_t)mol.natoms * sizeof *it->x);
        it->id = nd_dataset_hash(it->natoms, it->z, it->x, it->charge, it->mult);
    }
done:
    nd_molecule_free(&mol);
    nd_reader_close(r);
    if (rc != 0) {
        for (int i = 0; i < n; i++)
            item_free(&items[i]);
        free(items);
        return rc;
    }
    *out = items;
    *nout = n;
    return 0;
}

/* Chooses up to want items of todo[0..n) for the audit, seeded: half from
 * the flagged ones (planar or coincident) when there are any, the rest
 * from the others, topping up from either side when one runs short. */
static void choose_audit(item **todo, int n, int want, unsigned long long seed)
{
    if (want <= 0 || n == 0)
        return;
    int *flag = malloc((size_t)n * sizeof *flag), *plain = malloc((size_t)n * sizeof *plain);
    if (!flag || !plain) {
        free(flag);
        free(plain);
        return;
    }
    int nf = 0, np = 0;
    for (int i = 0; i < n; i++) {
        if (todo[i]->flagged)
            flag[nf++] = i;
        else
            plain[np++] = i;
    }
    nd_rng rng;
    nd_rng_stream(&rng, seed, 0x61756469ULL); /* "audi": its own stream */
    /* Partial Fisher-Yates shuffles of both lists. */
    for (int i = 0; i < nf; i++) {
        int j = i + (int)nd_rng_below(&rng, (uint64_t)(nf - i));
        int t = flag[i]; flag[i] = flag[j]; flag[j] = t;
    }
    for (int i = 0; i < np; i++) {
        int j = i + (int)nd_rng_below(&rng, (uint64_t)(np - i));
        int t = plain[i]; plain[i] = plain[j]; plain[j] = t;
    }
    int take_f = nf ? (want + 1) / 2 : 0;
    if (take_f > nf)
        take_f = nf;
    int take_p = want - take_f;
    if (take_p > np)
        take_p = np;
    if (take_f + take_p < want)
        take_f = want - take_p < nf ? want - take_p : nf;
    for (int i = 0; i < take_f; i++)
        todo[flag[i]]->audited = 1;
    for (int i = 0; i < take_p; i++)
        todo[plain[i]]->audited = 1;
    free(flag);
    free(plain);
}

/* Basename of the program word of the command, for "source". */
static char *program_name(const char *command)
{
    char **argv;
    int argc;
    if (nd_external_split(command, &argv, &argc, NULL) != ND_OK)
        return NULL;
    const char *b = strrchr(argv[0], '/');
    char *r = strdup(b ? b + 1 : argv[0]);
    nd_external_free_argv(argv);
    return r;
}

int cmd_label(int argc, char **argv)
{
    label_options o;
    int rc = parse(argc, argv, &o);
    if (rc != 0)
        return rc < 0 ? ND_EXIT_OK : rc;

    nd_error err;
    nd_error_clear(&err);
    item *items = NULL, **todo = NULL;
    int nitems = 0, read_failed = 0;
    nd_dataset *have = NULL;
    nd_dataset_writer *w = NULL;
    char *source = NULL;

    /* Check the command before reading anything. */
    {
        char **av;
        int ac;
        if (nd_external_split(o.command, &av, &ac, &err) != ND_OK)
            return cli_usage(CMD, "--potential-command: %s", err.msg);
        nd_external_free_argv(av);
        int hz = 1;
        nd_external *probe = NULL;
        if (nd_external_new(&probe, o.command, 1, &hz, 0, 1, 1.0, &err) != ND_OK)
            return cli_error(CMD, &err);
        nd_external_free(probe);
    }
    source = o.source ? strdup(o.source) : program_name(o.command);

    rc = read_items(&o, &items, &nitems, &read_failed);
    if (rc != 0)
        goto done;
    if (nitems == 0) { /* nothing to label: leave the dataset as it is (or absent) */
        rc = cli_fail(CMD, ND_EINPUT, "no usable structure in %s (%d unusable record%s); %s not touched",
                      o.input, read_failed, read_failed == 1 ? "" : "s", o.output);
        goto done;
    }

    long dropped = 0;
    if (nd_dataset_writer_open(&w, o.output, &dropped, &err) != ND_OK) {
        rc = cli_error(CMD, &err);
        goto done;
    }
    if (dropped)
        fprintf(stderr, "nadir %s: %s: cut off a partial last line (%ld bytes) from an interrupted run\n",
                CMD, o.output, dropped);
    nd_dataset_report rep;
    if (nd_dataset_load(&have, o.output, ND_DATASET_SKIP_BAD, &rep, &err) != ND_OK) {
        rc = cli_error(CMD, &err);
        goto done;
    }
    if (rep.bad_lines)
        fprintf(stderr, "nadir %s: warning: %ld bad line%s in %s ignored (first: %s)\n", CMD,
                rep.bad_lines, rep.bad_lines == 1 ? "" : "s", o.output, rep.first_bad);

    /* What is left to do: not in the dataset, not a repeat within IN. */
    todo = malloc(((size_t)nitems + 1) * sizeof *todo);
    if (!todo) {
        rc = cli_fail(CMD, ND_ENOMEM, "out of memory");
        goto done;
    }
    for (int i = 0; i < nitems; i++)
        todo[i] = &items[i];
    qsort(todo, (size_t)nitems, sizeof *todo, cmp_id);
    int already = 0, repeats = 0;
    for (int i = 0; i < nitems; i++) {
        if (nd_dataset_has_id(have, todo[i]->id)) {
            todo[i]->done = 2;
            already++;
        } else if (i > 0 && todo[i - 1]->id == todo[i]->id) {
            todo[i]->done = 2;
            repeats++;
        }
    }
    int ntodo = 0;
    for (int i = 0; i < nitems; i++)
        if (!items[i].done)
            todo[ntodo++] = &items[i]; /* back in input order */

    /* Flag and nudge planar or coincident structures (seeded per structure). */
    int nflagged = 0;
    for (int i = 0; i < ntodo; i++) {
        item *it = todo[i];
        it->flagged = plane_rms(it->natoms, it->x) < PLANAR_RMS || coincident(it->natoms, it->x);
        nflagged += it->flagged;
        if (it->flagged && o.nudge > 0) {
            nd_rng rng;
            nd_rng_stream(&rng, o.seed, it->id);
            for (int k = 0; k < 3 * it->natoms; k++)
                it->x[k] += o.nudge * nd_rng_normal(&rng);
        }
    }
    choose_audit(todo, ntodo, o.audit, o.seed);

    fprintf(stderr, "nadir %s: %d structure%s in %s: %d to label, %d already in %s%s", CMD, nitems,
            nitems == 1 ? "" : "s", o.input, ntodo, already, o.output,
            repeats ? ", " : "");
    if (repeats)
        fprintf(stderr, "%d repeated in the input", repeats);
    fputc('\n', stderr);
    if (nflagged)
        fprintf(stderr, "nadir %s: %d planar or coincident structure%s %s\n", CMD, nflagged,
                nflagged == 1 ? "" : "s",
                o.nudge > 0 ? "nudged before labelling" : "labelled as they are (--nudge 0)");

    /* Label in parallel; write in input order as results complete. */
    int next = 0, labelled = 0, failed = 0, refused = 0, in_a_row = 0, stop = 0, write_failed = 0;
    int naudited = 0;
    double audit_max = 0;
    nd_error werr;
    nd_error_clear(&werr);
    nd_progress prog;
    nd_progress_start(&prog, "structures", ntodo);
    int threads = o.threads > 0 ? o.threads : omp_get_max_threads();
#pragma omp parallel for schedule(dynamic, 1) num_threads(threads)
    for (int i = 0; i < ntodo; i++) {
        int skip;
#pragma omp atomic read
        skip = stop;
        item *it = todo[i];
        if (!skip)
            label_one(it, &o);
        else
            it->status = -1; /* not attempted */
#pragma omp critical(label_write)
        {
            it->done = 1;
            while (next < ntodo && todo[next]->done) {
                item *d = todo[next];
                if (d->status == ND_OK && !write_failed) {
                    double *f = malloc(3 * (size_t)d->natoms * sizeof *f);
                    int ws = ND_ENOMEM;
                    if (f) {
                        for (int k = 0; k < 3 * d->natoms; k++)
                            f[k] = -d->g[k];
                        nd_dataset_entry e = {d->natoms, d->z, d->x, d->energy, f, d->charge,
                                              d->mult, d->key, source, o.tag, d->id};
                        ws = nd_dataset_writer_append(w, &e, &werr);
                        free(f);
                    }
                    if (ws != ND_OK) {
                        write_failed = 1;
#pragma omp atomic write
                        stop = 1;
                        if (!f)
                            nd_fail(&werr, ND_ENOMEM, "out of memory");
                    } else {
                        labelled++;
                        in_a_row = 0;
                    }
                } else if (d->status > 0) {
                    fprintf(stderr, "nadir %s: %s, record %d (%s): %s\n", CMD, o.input, d->record,
                            d->key, d->msg);
                    if (d->audited && d->status == ND_ECOMPUTE && d->audit_worst > o.audit_tol)
                        refused++;
                    else
                        failed++;
                    if (++in_a_row >= GIVE_UP_AFTER && labelled == 0 && !stop) {
#pragma omp atomic write
                        stop = 1;
                        fprintf(stderr, "nadir %s: the first %d structures all failed; stopping\n",
                                CMD, GIVE_UP_AFTER);
                    }
                }
                if (d->audited && (d->status == ND_OK || d->audit_worst > o.audit_tol)) {
                    naudited++;
                    if (d->audit_worst > audit_max)
                        audit_max = d->audit_worst;
                    fprintf(stderr,
                            "nadir %s: audit: record %d (%s, %d atoms%s): worst |gradient - finite "
                            "difference| %.4g kcal/mol/A at atom %d (%c): %s\n",
                            CMD, d->record, d->key, d->natoms,
                            d->flagged ? (o.nudge > 0 ? ", planar or coincident, nudged"
                                                      : ", planar or coincident, not nudged")
                                       : "",
                            d->audit_worst, d->audit_atom + 1, "xyz"[d->audit_axis],
                            d->audit_worst <= o.audit_tol ? "ok" : "refused");
                }
                free(d->g);
                d->g = NULL;
                next++;
            }
            nd_progress_update(&prog, next);
        }
    }
    nd_progress_finish(&prog);
    if (write_failed) {
        rc = cli_error(CMD, &werr);
        goto done;
    }
    int skipped = ntodo - labelled - failed - refused;
    fprintf(stderr, "nadir %s: %d labelled and appended to %s, %d already there", CMD, labelled,
            o.output, already);
    if (failed)
        fprintf(stderr, ", %d failed", failed);
    if (refused)
        fprintf(stderr, ", %d refused by the audit", refused);
    if (skipped > 0)
        fprintf(stderr, ", %d not attempted", skipped);
    if (read_failed)
        fprintf(stderr, ", %d unusable record%s in %s", read_failed, read_failed == 1 ? "" : "s",
                o.input);
    fputc('\n', stderr);
    if (naudited)
        fprintf(stderr, "nadir %s: audit of %d structure%s: worst disagreement %.4g kcal/mol/A "
                        "(tolerance %g, step %g A)\n",
                CMD, naudited, naudited == 1 ? "" : "s", audit_max, o.audit_tol, o.audit_step);
    int bad = failed + refused + (skipped > 0 ? skipped : 0) + read_failed;
    if (!bad)
        rc = ND_EXIT_OK;
    else if (labelled == 0 && (failed || refused || already == 0))
        rc = read_failed && !failed && !refused ? ND_EXIT_INPUT : ND_EXIT_COMPUTE;
    else
        rc = ND_EXIT_PARTIAL;
done:
    if (w && nd_dataset_writer_close(w, &err) != ND_OK && rc == 0)
        rc = cli_error(CMD, &err);
    nd_dataset_free(have);
    for (int i = 0; i < nitems; i++)
        item_free(&items[i]);
    free(items);
    free(todo);
    free(source);
    return rc;
}
