/* nadir train: fits a learned potential (an ensemble of per-element
 * networks) to the reference energies and forces of a JSON Lines dataset.
 * The loop lives here: the library runs one epoch at a time, and this
 * command prints the progress line, writes the checkpoint after every
 * epoch, and writes the model at the end. */
#include "cli/cli.h"
#include "core/lineio.h"

#include <getopt.h>
#include <math.h>
#include <omp.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

static const char *CMD = "train";

typedef struct {
    const char *data, *output, *state, *start, *always, *descriptor;
    int threads, resume, skip_bad, cache, quiet;
    int shape_given; /* --elements, --layers or --members was given */
    nd_train_config cfg;
} train_options;

static void usage(FILE *f)
{
    nd_train_config d;
    nd_train_config_defaults(&d);
    fprintf(f,
            "usage: nadir train DATA.jsonl [-o MODEL] [options]\n"
            "\n"
            "Fits a learned potential to the reference energies and forces of DATA.jsonl\n"
            "(the dataset format of potential/dataset.h). The molecules (structures sharing\n"
            "a \"key\") are split at random into a training and a validation set, so that no\n"
            "molecule is in both. Element energy offsets are fitted by least squares and\n"
            "every descriptor feature is standardised before training. Each ensemble member\n"
            "starts from its own random weights and sees the data in its own order; it keeps\n"
            "the weights of the epoch with the lowest validation error of relative energies\n"
            "within a molecule (what conformer ranking needs) and stops when that has not\n"
            "improved for a while. The learning rate halves when the validation loss stalls.\n"
            "\n"
            "After every epoch a line goes to stderr: the epoch, the energy (E, kcal/mol per\n"
            "structure) and force (F, kcal/mol/angstrom per component) mean absolute errors\n"
            "on the training batches and on the validation molecules, the relative-energy\n"
            "error (rel), the learning rate, and the time taken and left. The whole state is\n"
            "saved after every epoch; --resume continues an interrupted run and gives the\n"
            "same model as an uninterrupted one.\n"
            "\n"
            "  DATA.jsonl               the dataset\n"
            "  -o, --output MODEL       the model file to write (default trained.model)\n"
            "  --elements H,C,N,O       the elements the model covers (default: those in\n"
            "                           the dataset); a structure with another element is\n"
            "                           an error naming its line\n"
            "  --descriptor FILE        the symmetry functions (cutoffs, radial and angular\n"
            "                           sets) as JSON: the \"descriptor\" object of a model\n"
            "                           file's header, alone or under \"descriptor\"\n"
            "                           (default: potential/descriptors/default.json);\n"
            "                           with --start-from, a descriptor that adds functions\n"
            "                           to the start model's: the new features start at\n"
            "                           zero weight, so training begins from its energies\n"
            "  --layers 96,64           widths of the hidden layers (default %d,%d)\n"
            "  --members K              ensemble members (default %d)\n"
            "  --epochs N               at most N epochs (default %d)\n"
            "  --batch N                structures per minibatch (default %d)\n"
            "  --force-weight W         weight of the force term of the loss (default %g;\n"
            "                           0 trains on energies only)\n"
            "  --energy-window E        weigh the energies of structures more than E\n"
            "                           kcal/mol above their molecule's lowest by\n"
            "                           (E/excess)^2, so the fit favours the low-energy\n"
            "                           shapes conformer ranking needs; the validation\n"
            "                           relative error then counts those within E\n"
            "                           (default 0: every energy weighs alike)\n"
            "  --molecule-offset A      fit energies relative within each molecule: the\n"
            "                           loss sees each energy error less A times the\n"
            "                           member's mean error over that molecule's training\n"
            "                           structures (A from 0 to 1; 1 leaves each\n"
            "                           molecule's absolute level free, so energies of\n"
            "                           different molecules compare less well; default 0)\n"
            "  --validation-fraction F  fraction of the molecules held out (default %g)\n"
            "  --always-train KEYS      a file of molecule keys (one per line, # comments)\n"
            "                           that always train and are never held out, such as\n"
            "                           small molecules that alone teach an environment\n"
            "  --learning-rate R        initial Adam step (default %g)\n"
            "  --learning-rate-floor R  the rate never halves below R (default %g)\n"
            "  --patience N             a member stops after N epochs without a better\n"
            "                           validation relative-energy error (default %d)\n"
            "  --rate-patience N        epochs without a better validation loss before the\n"
            "                           rate halves (default %d)\n"
            "  --weight-decay L         L2 penalty on the weights (default %g)\n"
            "  --seed S                 seed of the split, weights and orders (default %llu)\n"
            "  --threads N              threads (default: the number of cores); the result\n"
            "                           does not depend on it\n"
            "  --start-from MODEL       warm start: begin from MODEL's weights, element\n"
            "                           offsets and feature scaling instead of random\n"
            "                           weights (its elements, layers, members and\n"
            "                           descriptor are kept unless --descriptor widens\n"
            "                           it), e.g. to refine a model on more data at a\n"
            "                           fraction of the cost\n"
            "  --state FILE             the checkpoint (default MODEL.state)\n"
            "  --resume                 continue from the checkpoint; the dataset and the\n"
            "                           options must be the same (--epochs may grow)\n"
            "  --skip-bad-lines         skip malformed dataset lines (counted) instead of\n"
            "                           stopping at the first\n"
            "  --cache                  keep a binary cache next to the dataset (faster reloads)\n"
            "  --quiet                  no progress lines\n"
            "  --help                   this text\n"
            "\n"
            "examples:\n"
            "  nadir train labels.jsonl -o mine.model\n"
            "  nadir train labels.jsonl -o mine.model --elements H,C,N,O --layers 64,32 \\\n"
            "        --members 2 --epochs 50 --threads 2\n"
            "  nadir train labels.jsonl -o wide.model --descriptor my-descriptor.json\n"
            "  nadir train labels.jsonl -o mine.model --resume     (after an interruption)\n"
            "  nadir train more.jsonl -o refined.model --start-from mine.model --epochs 30\n"
            "\n"
            "exit: 0 model written, 3 unreadable or invalid dataset or checkpoint, 4 the\n"
            "training failed (non-finite values), 2 usage\n",
            d.hidden[0], d.hidden[1], d.members, d.epochs, d.batch, d.force_weight,
            d.validation_fraction, d.learning_rate, d.min_learning_rate, d.stop_patience,
            d.lr_patience, d.weight_decay, (unsigned long long)d.seed);
}

/* Parses "H,C,N,O" into the config. */
static int parse_elements(const char *s, nd_train_config *c)
{
    c->nelements = 0;
    const char *p = s;
    while (*p) {
        const char *q = strchr(p, ',');
        int len = q ? (int)(q - p) : (int)strlen(p);
        int z = nd_element_from_symbol(p, len);
        if (z <= 0)
            return cli_usage(CMD, "--elements: '%.*s' is not an element symbol", len, p);
        for (int i = 0; i < c->nelements; i++)
            if (c->z[i] == z)
                return cli_usage(CMD, "--elements: %s is listed twice", nd_element_symbol(z));
        if (c->nelements == ND_MODEL_SPEC_MAX_ELEMENTS)
            return cli_usage(CMD, "--elements: at most %d elements", ND_MODEL_SPEC_MAX_ELEMENTS);
        c->z[c->nelements++] = z;
        if (!q)
            break;
        p = q + 1;
    }
    if (c->nelements == 0)
        return cli_usage(CMD, "--elements needs at least one element");
    return 0;
}

/* Parses "96,64" into the hidden widths. */
static int parse_layers(const char *s, nd_train_config *c)
{
    int n = 0;
    const char *p = s;
    for (;;) {
        char *end;
        long w = strtol(p, &end, 10);
        if (end == p || w < 1 || w > 4096 || (*end && *end != ','))
            return cli_usage(CMD, "--layers takes widths like 96,64 (1 to 4096 each), not '%s'", s);
        if (n == ND_MODEL_SPEC_MAX_HIDDEN)
            return cli_usage(CMD, "--layers: at most %d hidden layers", ND_MODEL_SPEC_MAX_HIDDEN);
        c->hidden[n++] = (int)w;
        if (!*end)
            break;
        p = end + 1;
    }
    c->nhidden = n;
    return 0;
}

static int parse(int argc, char **argv, train_options *o)
{
    enum { O_ELEM = 256, O_LAYERS, O_MEMBERS, O_EPOCHS, O_BATCH, O_FW, O_VF, O_LR, O_LRF, O_PAT,
           O_RPAT, O_WD, O_SEED, O_THREADS, O_STATE, O_RESUME, O_SKIP, O_CACHE, O_QUIET, O_START,
           O_EW, O_MO, O_ALWAYS, O_DESC };
    static const struct option longopts[] = {{"output", required_argument, NULL, 'o'},
                                              {"elements", required_argument, NULL, O_ELEM},
                                              {"layers", required_argument, NULL, O_LAYERS},
                                              {"descriptor", required_argument, NULL, O_DESC},
                                              {"members", required_argument, NULL, O_MEMBERS},
                                              {"epochs", required_argument, NULL, O_EPOCHS},
                                              {"batch", required_argument, NULL, O_BATCH},
                                              {"force-weight", required_argument, NULL, O_FW},
                                              {"energy-window", required_argument, NULL, O_EW},
                                              {"molecule-offset", required_argument, NULL, O_MO},
                                              {"validation-fraction", required_argument, NULL, O_VF},
                                              {"always-train", required_argument, NULL, O_ALWAYS},
                                              {"learning-rate", required_argument, NULL, O_LR},
                                              {"learning-rate-floor", required_argument, NULL, O_LRF},
                                              {"patience", required_argument, NULL, O_PAT},
                                              {"rate-patience", required_argument, NULL, O_RPAT},
                                              {"weight-decay", required_argument, NULL, O_WD},
                                              {"seed", required_argument, NULL, O_SEED},
                                              {"threads", required_argument, NULL, O_THREADS},
                                              {"state", required_argument, NULL, O_STATE},
                                              {"start-from", required_argument, NULL, O_START},
                                              {"resume", no_argument, NULL, O_RESUME},
                                              {"skip-bad-lines", no_argument, NULL, O_SKIP},
                                              {"cache", no_argument, NULL, O_CACHE},
                                              {"quiet", no_argument, NULL, O_QUIET},
                                              {"help", no_argument, NULL, 'h'},
                                              {NULL, 0, NULL, 0}};
    memset(o, 0, sizeof *o);
    nd_train_config_defaults(&o->cfg);
    o->output = "trained.model";
    opterr = 0;
    optind = 1;
    int c, iv;
    double v;
    while ((c = getopt_long(argc, argv, ":ho:", longopts, NULL)) != -1) {
        switch (c) {
        case 'o': o->output = optarg; break;
        case O_ELEM:
            if ((iv = parse_elements(optarg, &o->cfg)))
                return iv;
            o->shape_given = 1;
            break;
        case O_LAYERS:
            if ((iv = parse_layers(optarg, &o->cfg)))
                return iv;
            o->shape_given = 1;
            break;
        case O_DESC:
            o->descriptor = optarg;
            o->cfg.descriptor_given = 1;
            break;
        case O_MEMBERS:
        case O_EPOCHS:
        case O_BATCH:
        case O_PAT:
        case O_RPAT:
        case O_THREADS: {
            static const char *names[] = {"--members", "--epochs", "--batch", "--patience",
                                          "--rate-patience", "--threads"};
            int which = c == O_MEMBERS ? 0 : c == O_EPOCHS ? 1 : c == O_BATCH ? 2
                      : c == O_PAT ? 3 : c == O_RPAT ? 4 : 5;
            int lo = which == 1 ? 0 : 1, hi = which == 0 ? 64 : which == 5 ? 1024 : 100000000;
            if (cli_parse_int(optarg, &iv) < 0 || iv < lo || iv > hi)
                return cli_usage(CMD, "%s takes a whole number from %d to %d, not '%s'",
                                 names[which], lo, hi, optarg);
            if (which == 0) {
                o->cfg.members = iv;
                o->shape_given = 1;
            }
            else if (which == 1)
                o->cfg.epochs = iv;
            else if (which == 2)
                o->cfg.batch = iv;
            else if (which == 3)
                o->cfg.stop_patience = iv;
            else if (which == 4)
                o->cfg.lr_patience = iv;
            else
                o->threads = iv;
            break;
        }
        case O_FW:
        case O_EW:
        case O_VF:
        case O_LR:
        case O_LRF:
        case O_WD: {
            const char *name = c == O_FW ? "--force-weight" : c == O_EW ? "--energy-window"
                             : c == O_VF ? "--validation-fraction"
                             : c == O_LR ? "--learning-rate" : c == O_LRF ? "--learning-rate-floor"
                                                                          : "--weight-decay";
            if (cli_parse_double(optarg, &v) < 0 || !isfinite(v) || v < 0)
                return cli_usage(CMD, "%s takes a number of 0 or more, not '%s'", name, optarg);
            if ((c == O_LR || c == O_LRF) && v <= 0)
                return cli_usage(CMD, "%s must be positive", name);
            if (c == O_VF && v >= 1)
                return cli_usage(CMD, "--validation-fraction must be below 1");
            if (c == O_FW)
                o->cfg.force_weight = v;
            else if (c == O_EW)
                o->cfg.energy_window = v;
            else if (c == O_VF)
                o->cfg.validation_fraction = v;
            else if (c == O_LR)
                o->cfg.learning_rate = v;
            else if (c == O_LRF)
                o->cfg.min_learning_rate = v;
            else
                o->cfg.weight_decay = v;
            break;
        }
        case O_MO:
            if (cli_parse_double(optarg, &v) < 0 || !(v >= 0 && v <= 1))
                return cli_usage(CMD, "--molecule-offset takes a number from 0 to 1, not '%s'",
                                 optarg);
            o->cfg.molecule_offset = v;
            break;
        case O_SEED: {
            char *end;
            unsigned long long s = strtoull(optarg, &end, 10);
            if (!*optarg || *end || optarg[0] == '-')
                return cli_usage(CMD, "--seed takes a whole number of 0 or more, not '%s'", optarg);
            o->cfg.seed = s;
            break;
        }
        case O_STATE: o->state = optarg; break;
        case O_ALWAYS: o->always = optarg; break;
        case O_START: o->start = optarg; break;
        case O_RESUME: o->resume = 1; break;
        case O_SKIP: o->skip_bad = 1; break;
        case O_CACHE: o->cache = 1; break;
        case O_QUIET: o->quiet = 1; break;
        case 'h': usage(stdout); return -1;
        case ':': return cli_usage(CMD, "%s needs a value", argv[optind - 1]);
        default: return cli_usage(CMD, "unknown option '%s'", argv[optind - 1]);
        }
    }
    if (optind != argc - 1)
        return cli_usage(CMD, optind >= argc ? "no dataset given" : "one dataset only");
    o->data = argv[optind];
    if (o->start && o->shape_given)
        return cli_usage(CMD, "--start-from keeps the start model's elements, layers and members; "
                              "leave out --elements, --layers and --members");
    if (o->cfg.min_learning_rate > o->cfg.learning_rate)
        return cli_usage(CMD, "--learning-rate-floor %g is above --learning-rate %g",
                         o->cfg.min_learning_rate, o->cfg.learning_rate);
    return 0;
}

/* Frees the n keys of read_keys and their array; accepts NULL. */
static void free_keys(char **keys, int n)
{
    for (int q = 0; q < n && keys; q++)
        free(keys[q]);
    free(keys);
}

/* The keys of an --always-train file: one per line, surrounding blanks
 * dropped, empty lines, lines starting with # and repeats skipped. Free
 * *keys with free_keys. */
static int read_keys(const char *path, char ***keys, int *n, nd_error *err)
{
    *keys = NULL;
    *n = 0;
    FILE *f = fopen(path, "rb");
    if (!f)
        return nd_fail(err, ND_EIO, "--always-train %s: cannot open it", path);
    nd_lines l;
    nd_lines_init(&l, path, "line", NULL, 0, f);
    char **k = NULL;
    int count = 0, cap = 0, s;
    while ((s = nd_lines_next(&l, err)) == ND_OK) {
        char *p = l.buf;
        while (*p == ' ' || *p == '\t')
            p++;
        size_t len = strlen(p);
        while (len > 0 && (p[len - 1] == ' ' || p[len - 1] == '\t' || p[len - 1] == '\r'))
            p[--len] = 0;
        int skip = len == 0 || p[0] == '#';
        for (int q = 0; q < count && !skip; q++)
            skip = strcmp(k[q], p) == 0;
        if (skip)
            continue;
        if (count == cap) {
            cap = cap ? 2 * cap : 64;
            char **bigger = realloc(k, (size_t)cap * sizeof *k);
            if (!bigger) {
                s = nd_fail(err, ND_ENOMEM, "--always-train %s: out of memory", path);
                break;
            }
            k = bigger;
        }
        if (!(k[count] = strdup(p))) {
            s = nd_fail(err, ND_ENOMEM, "--always-train %s: out of memory", path);
            break;
        }
        count++;
    }
    nd_lines_free(&l);
    fclose(f);
    if (s != ND_END) {
        free_keys(k, count);
        return s;
    }
    *keys = k;
    *n = count;
    return ND_OK;
}

/* "1:02:03" or "2:03" for seconds. */
static void clock_text(double s, char *buf, size_t size)
{
    if (!isfinite(s) || s < 0) {
        snprintf(buf, size, "-");
        return;
    }
    long t = (long)(s + 0.5);
    if (t >= 3600)
        snprintf(buf, size, "%ld:%02ld:%02ld", t / 3600, t / 60 % 60, t % 60);
    else
        snprintf(buf, size, "%ld:%02ld", t / 60, t % 60);
}

/* A number with 3 decimals, or "-" for NaN. */
static const char *num(double v, char *buf, size_t size)
{
    if (isfinite(v))
        snprintf(buf, size, "%.3f", v);
    else
        snprintf(buf, size, "-");
    return buf;
}

static void progress_line(const nd_train_epoch_report *r, double elapsed, double left)
{
    char a[32], b[32], c[32], d[32], e[32], t1[32], t2[32];
    clock_text(elapsed, t1, sizeof t1);
    clock_text(left, t2, sizeof t2);
    fprintf(stderr,
            "epoch %4d/%d  train E %s F %s  valid E %s F %s rel %s  lr %.1e  members %d  "
            "elapsed %s  left %s\n",
            r->epoch, r->max_epochs, num(r->train.energy_mae, a, sizeof a),
            num(r->train.force_mae, b, sizeof b), num(r->valid.energy_mae, c, sizeof c),
            num(r->valid.force_mae, d, sizeof d), num(r->valid.relative_mae, e, sizeof e),
            r->learning_rate, r->members_training, t1, t2);
    fflush(stderr);
}

/* Warns about splits that would mislead: far more molecules held out than
 * asked (a dataset of few molecules), and elements met only in validation
 * molecules (their networks never see a training structure). */
static void split_warnings(const nd_train *t, const nd_dataset *d, const nd_train_split_info *si,
                           double fraction)
{
    int nmol = si->train_molecules + si->valid_molecules;
    if (si->valid_molecules > 0 && nmol > 0 &&
        (double)si->valid_molecules > 2.0 * fraction * (double)nmol + 0.5)
        fprintf(stderr,
                "nadir train: warning: %d of %d molecules (%.0f%%) held out for validation, more "
                "than the --validation-fraction %g asked: the dataset has few molecules\n",
                si->valid_molecules, nmol, 100.0 * si->valid_molecules / nmol, fraction);
    unsigned char in_train[ND_MAX_Z + 1] = {0}, in_valid[ND_MAX_Z + 1] = {0};
    long n;
    const long *idx = nd_train_training_set(t, &n);
    nd_dataset_entry e;
    for (long i = 0; i < n; i++) {
        nd_dataset_get(d, idx[i], &e);
        for (int a = 0; a < e.natoms; a++)
            if (e.z[a] >= 1 && e.z[a] <= ND_MAX_Z)
                in_train[e.z[a]] = 1;
    }
    idx = nd_train_validation_set(t, &n);
    for (long i = 0; i < n; i++) {
        nd_dataset_get(d, idx[i], &e);
        for (int a = 0; a < e.natoms; a++)
            if (e.z[a] >= 1 && e.z[a] <= ND_MAX_Z)
                in_valid[e.z[a]] = 1;
    }
    for (int z = 1; z <= ND_MAX_Z; z++)
        if (in_valid[z] && !in_train[z])
            fprintf(stderr,
                    "nadir train: warning: element %s is only in validation molecules; the "
                    "model learns nothing about it (add molecules with %s, or change --seed)\n",
                    nd_element_symbol(z), nd_element_symbol(z));
}

int cmd_train(int argc, char **argv)
{
    train_options o;
    int s = parse(argc, argv, &o);
    if (s)
        return s < 0 ? ND_EXIT_OK : s;
    if (o.threads > 0)
        omp_set_num_threads(o.threads);
    char state[4096];
    if (o.state)
        snprintf(state, sizeof state, "%s", o.state);
    else
        snprintf(state, sizeof state, "%s.state", o.output);
    nd_error err;
    if (o.descriptor && nd_descriptor_json_load(o.descriptor, &o.cfg.descriptor, &err))
        return cli_error(CMD, &err);
    nd_dataset *d = NULL;
    nd_dataset_report rep;
    int flags = (o.skip_bad ? ND_DATASET_SKIP_BAD : 0) | (o.cache ? ND_DATASET_CACHE : 0);
    if ((s = nd_dataset_load(&d, o.data, flags, &rep, &err)))
        return cli_error(CMD, &err);
    if (rep.bad_lines)
        fprintf(stderr, "nadir train: skipped %ld bad lines; the first: %s\n", rep.bad_lines,
                rep.first_bad);
    char **keys = NULL;
    if (o.always) {
        if ((s = read_keys(o.always, &keys, &o.cfg.always_train_count, &err))) {
            nd_dataset_free(d);
            return cli_error(CMD, &err);
        }
        o.cfg.always_train = (const char *const *)keys;
    }
    nd_model *from = NULL;
    if (o.start) {
        if ((s = nd_model_load(o.start, &from, &err))) {
            free_keys(keys, o.cfg.always_train_count);
            nd_dataset_free(d);
            return cli_error(CMD, &err);
        }
        o.cfg.start = from;
        o.cfg.start_name = o.start;
        o.cfg.members = nd_model_members(from);
    }
    nd_train *t = NULL;
    s = nd_train_new(&t, d, o.data, &o.cfg, &err);
    nd_model_free(from);
    o.cfg.start = NULL;
    int nkeys = o.cfg.always_train_count;
    free_keys(keys, nkeys);
    o.cfg.always_train = NULL;
    if (s) {
        nd_dataset_free(d);
        return cli_error(CMD, &err);
    }
    if (o.resume) {
        if ((s = nd_train_load_state(t, state, &err))) {
            nd_train_free(t);
            nd_dataset_free(d);
            return cli_error(CMD, &err);
        }
        nd_train_set_epochs(t, o.cfg.epochs);
    }
    nd_train_split_info si;
    nd_train_split(t, &si);
    if (!o.quiet) {
        fprintf(stderr,
                "nadir train: %ld structures of %d molecule%s; training %ld (%d molecule%s), "
                "validation %ld (%d molecule%s); %d member%s\n",
                nd_dataset_count(d), nd_dataset_key_count(d),
                nd_dataset_key_count(d) == 1 ? "" : "s", si.train_structures, si.train_molecules,
                si.train_molecules == 1 ? "" : "s", si.valid_structures, si.valid_molecules,
                si.valid_molecules == 1 ? "" : "s", o.cfg.members, o.cfg.members == 1 ? "" : "s");
        if (o.resume)
            fprintf(stderr, "nadir train: resuming after epoch %d from %s\n",
                    nd_train_epochs_done(t), state);
    }
    if (o.always && !o.quiet)
        fprintf(stderr, "nadir train: %d of the %d keys of %s are in the dataset; they train and "
                "are never held out\n", si.always_train_matched, nkeys, o.always);
    if (o.always && si.always_train_matched < nkeys)
        fprintf(stderr, "nadir train: warning: %d key%s of %s %s not in the dataset\n",
                nkeys - si.always_train_matched, nkeys - si.always_train_matched == 1 ? "" : "s",
                o.always, nkeys - si.always_train_matched == 1 ? "is" : "are");
    split_warnings(t, d, &si, o.cfg.validation_fraction);
    double before = nd_train_elapsed(t), start = nd_progress_clock();
    int done0 = nd_train_epochs_done(t);
    nd_train_epoch_report r;
    memset(&r, 0, sizeof r);
    for (;;) {
        s = nd_train_epoch(t, &r, &err);
        if (s != ND_CONTINUE && s != ND_OK)
            break;
        if (r.epoch == 0) /* nothing was left to do */
            break;
        double el = before + nd_progress_clock() - start;
        nd_train_set_elapsed(t, el);
        int ran = r.epoch - done0;
        double per = ran > 0 ? (nd_progress_clock() - start) / ran : (double)NAN;
        double left = s == ND_OK ? 0 : per * (r.max_epochs - r.epoch);
        if (!o.quiet)
            progress_line(&r, el, left);
        int w = nd_train_save_state(t, state, &err);
        if (w) {
            s = w;
            break;
        }
        if (s == ND_OK)
            break;
    }
    if (s != ND_OK) {
        int code = cli_error(CMD, &err);
        nd_train_free(t);
        nd_dataset_free(d);
        return code;
    }
    nd_model *m = NULL;
    if ((s = nd_train_model(t, &m, &err)) || (s = nd_model_save(m, o.output, &err))) {
        int code = cli_error(CMD, &err);
        nd_model_free(m);
        nd_train_free(t);
        nd_dataset_free(d);
        return code;
    }
    printf("wrote %s: %d members, %d epochs, %zu parameters\n", o.output, nd_model_members(m),
           nd_train_epochs_done(t), nd_model_parameter_count(m));
    cJSON *prov = cJSON_Parse(nd_model_provenance(m));
    const cJSON *va = cJSON_GetObjectItemCaseSensitive(prov, "validation");
    if (cJSON_IsObject(va) && si.valid_structures > 0) {
        const char *names[] = {"energy_mae", "force_mae", "relative_energy_mae"};
        double v[3];
        for (int q = 0; q < 3; q++) {
            const cJSON *it = cJSON_GetObjectItemCaseSensitive(va, names[q]);
            v[q] = cJSON_IsNumber(it) ? it->valuedouble : (double)NAN;
        }
        char a[32], b[32], c[32];
        printf("validation (ensemble mean, saved weights): energy MAE %s kcal/mol, force MAE %s "
               "kcal/mol/angstrom, relative-energy MAE %s kcal/mol\n",
               num(v[0], a, sizeof a), num(v[1], b, sizeof b), num(v[2], c, sizeof c));
    }
    cJSON_Delete(prov);
    printf("checkpoint %s (resume with --resume and a larger --epochs to train further)\n", state);
    nd_model_free(m);
    nd_train_free(t);
    nd_dataset_free(d);
    return ND_EXIT_OK;
}
