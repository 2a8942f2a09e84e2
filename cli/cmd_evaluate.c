/* nadir evaluate: the errors of a model on a dataset of reference energies
 * and forces, as aligned text or JSON. */
#include "cli/cli.h"

#include <getopt.h>
#include <math.h>
#include <omp.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

static const char *CMD = "evaluate";

typedef struct {
    const char *model, *data;
    int json, threads, skip_bad;
} eval_options;

static void usage(FILE *f)
{
    fprintf(f,
            "usage: nadir evaluate MODEL DATA.jsonl [--json] [options]\n"
            "\n"
            "Predicts every structure of DATA.jsonl with MODEL (the ensemble mean) and\n"
            "reports, in kcal/mol and kcal/mol/angstrom:\n"
            "  - energy mean absolute and root-mean-square errors, per structure and per atom;\n"
            "  - the mean absolute error of relative energies within each molecule (energies\n"
            "    measured from the molecule's lowest reference structure), which is what\n"
            "    ranking conformers needs;\n"
            "  - the Spearman rank correlation of predicted against reference energies within\n"
            "    each molecule of three or more structures: median, quartiles and extremes;\n"
            "  - force-component errors, overall and for each element;\n"
            "  - for ensembles, how the members' spread tracks the actual error: the rank\n"
            "    correlation between spread and |error|, and the fraction of errors within\n"
            "    one and two spreads (about 68%% and 95%% if the spread were a calibrated\n"
            "    Gaussian standard deviation).\n"
            "\n"
            "  MODEL             a model file (from nadir train)\n"
            "  DATA.jsonl        a dataset (potential/dataset.h)\n"
            "  --json            one JSON document on stdout instead of text\n"
            "  --threads N       threads (default: the number of cores)\n"
            "  --skip-bad-lines  skip malformed dataset lines instead of stopping\n"
            "  --help            this text\n"
            "\n"
            "examples:\n"
            "  nadir evaluate mine.model held-out.jsonl\n"
            "  nadir evaluate mine.model held-out.jsonl --json > errors.json\n"
            "\n"
            "exit: 0 done, 3 unreadable model or dataset, or an element or charge outside\n"
            "the model, 4 a prediction failed, 2 usage\n");
}

static int parse(int argc, char **argv, eval_options *o)
{
    enum { O_JSON = 256, O_THREADS, O_SKIP };
    static const struct option longopts[] = {{"json", no_argument, NULL, O_JSON},
                                              {"threads", required_argument, NULL, O_THREADS},
                                              {"skip-bad-lines", no_argument, NULL, O_SKIP},
                                              {"help", no_argument, NULL, 'h'},
                                              {NULL, 0, NULL, 0}};
    memset(o, 0, sizeof *o);
    opterr = 0;
    optind = 1;
    int c;
    while ((c = getopt_long(argc, argv, ":h", longopts, NULL)) != -1) {
        switch (c) {
        case O_JSON: o->json = 1; break;
        case O_SKIP: o->skip_bad = 1; break;
        case O_THREADS:
            if (cli_parse_int(optarg, &o->threads) < 0 || o->threads < 1 || o->threads > 1024)
                return cli_usage(CMD, "--threads takes a whole number from 1 to 1024, not '%s'",
                                 optarg);
            break;
        case 'h': usage(stdout); return -1;
        case ':': return cli_usage(CMD, "%s needs a value", argv[optind - 1]);
        default: return cli_usage(CMD, "unknown option '%s'", argv[optind - 1]);
        }
    }
    if (argc - optind != 2)
        return cli_usage(CMD, "expected a model and a dataset");
    o->model = argv[optind];
    o->data = argv[optind + 1];
    return 0;
}

/* Adds a number, or null when it is not finite. */
static void add(cJSON *o, const char *name, double v)
{
    if (isfinite(v))
        cJSON_AddNumberToObject(o, name, v);
    else
        cJSON_AddNullToObject(o, name);
}

static int write_json(const nd_evaluation *ev, const char *model, const char *data)
{
    cJSON *doc = cJSON_CreateObject();
    cJSON_AddStringToObject(doc, "model", model);
    cJSON_AddStringToObject(doc, "dataset", data);
    cJSON_AddNumberToObject(doc, "structures", (double)ev->structures);
    cJSON_AddNumberToObject(doc, "atoms", (double)ev->atoms);
    cJSON_AddNumberToObject(doc, "molecules", ev->molecules);
    cJSON_AddNumberToObject(doc, "members", ev->members);
    cJSON *u = cJSON_AddObjectToObject(doc, "units");
    cJSON_AddStringToObject(u, "energy", "kcal/mol");
    cJSON_AddStringToObject(u, "force", "kcal/mol/angstrom");
    cJSON *e = cJSON_AddObjectToObject(doc, "energy");
    add(e, "mae", ev->energy_mae);
    add(e, "rmse", ev->energy_rmse);
    add(e, "mae_per_atom", ev->energy_atom_mae);
    add(e, "rmse_per_atom", ev->energy_atom_rmse);
    cJSON *r = cJSON_AddObjectToObject(doc, "relative_energy");
    cJSON_AddNumberToObject(r, "structures", (double)ev->relative_count);
    add(r, "mae", ev->relative_mae);
    cJSON *k = cJSON_AddObjectToObject(doc, "rank_correlation");
    cJSON_AddNumberToObject(k, "molecules", ev->rank_molecules);
    add(k, "median", ev->rank_median);
    add(k, "lower_quartile", ev->rank_q1);
    add(k, "upper_quartile", ev->rank_q3);
    add(k, "lowest", ev->rank_min);
    add(k, "highest", ev->rank_max);
    cJSON *f = cJSON_AddObjectToObject(doc, "force");
    cJSON_AddNumberToObject(f, "components", (double)ev->force_components);
    add(f, "mae", ev->force_mae);
    add(f, "rmse", ev->force_rmse);
    cJSON *byel = cJSON_AddArrayToObject(f, "by_element");
    for (int q = 0; q < ev->nelements; q++) {
        cJSON *it = cJSON_CreateObject();
        cJSON_AddStringToObject(it, "element", nd_element_symbol(ev->z[q]));
        cJSON_AddNumberToObject(it, "components", (double)ev->element_components[q]);
        add(it, "mae", ev->element_force_mae[q]);
        add(it, "rmse", ev->element_force_rmse[q]);
        cJSON_AddItemToArray(byel, it);
    }
    if (ev->members > 1) {
        cJSON *s = cJSON_AddObjectToObject(doc, "spread");
        cJSON *se = cJSON_AddObjectToObject(s, "energy");
        add(se, "mean", ev->energy_spread_mean);
        add(se, "rank_correlation_with_error", ev->energy_spread_rank);
        add(se, "within_one_spread", ev->energy_within1);
        add(se, "within_two_spreads", ev->energy_within2);
        cJSON *sf = cJSON_AddObjectToObject(s, "force_per_atom");
        add(sf, "mean", ev->force_spread_mean);
        add(sf, "rank_correlation_with_error", ev->force_spread_rank);
        add(sf, "within_one_spread", ev->force_within1);
        add(sf, "within_two_spreads", ev->force_within2);
    }
    nd_error err;
    int s = nd_report_write(doc, "-", &err);
    cJSON_Delete(doc);
    return s ? cli_error(CMD, &err) : ND_EXIT_OK;
}

/* "%.3f" or "-" */
static const char *num(double v, char *buf)
{
    if (isfinite(v))
        snprintf(buf, 32, "%.3f", v);
    else
        snprintf(buf, 32, "-");
    return buf;
}

static void write_text(const nd_evaluation *ev)
{
    char a[32], b[32], c[32], d[32], e[32];
    printf("%ld structures, %ld atoms, %d molecules; model of %d member%s\n", ev->structures,
           ev->atoms, ev->molecules, ev->members, ev->members == 1 ? "" : "s");
    printf("\n%-34s %10s %10s\n", "", "MAE", "RMSE");
    printf("%-34s %10s %10s\n", "energy (kcal/mol)", num(ev->energy_mae, a), num(ev->energy_rmse, b));
    printf("%-34s %10s %10s\n", "energy per atom (kcal/mol)", num(ev->energy_atom_mae, a),
           num(ev->energy_atom_rmse, b));
    printf("%-34s %10s %10s   (%ld structures)\n", "relative energy (kcal/mol)",
           num(ev->relative_mae, a), "", ev->relative_count);
    printf("%-34s %10s %10s   (%ld components)\n", "force (kcal/mol/angstrom)",
           num(ev->force_mae, a), num(ev->force_rmse, b), ev->force_components);
    for (int q = 0; q < ev->nelements; q++) {
        char label[40];
        snprintf(label, sizeof label, "  on %s", nd_element_symbol(ev->z[q]));
        printf("%-34s %10s %10s   (%ld components)\n", label, num(ev->element_force_mae[q], a),
               num(ev->element_force_rmse[q], b), ev->element_components[q]);
    }
    printf("\nrank correlation of energies within a molecule (Spearman, %d molecules):\n",
           ev->rank_molecules);
    printf("  lowest %s  lower quartile %s  median %s  upper quartile %s  highest %s\n",
           num(ev->rank_min, a), num(ev->rank_q1, b), num(ev->rank_median, c), num(ev->rank_q3, d),
           num(ev->rank_max, e));
    if (ev->members > 1) {
        printf("\nensemble spread against the error of the mean:\n");
        printf("%-22s %12s %16s %12s %12s\n", "", "mean spread", "rank correlation",
               "within 1", "within 2");
        printf("%-22s %12s %16s %12s %12s\n", "energy", num(ev->energy_spread_mean, a),
               num(ev->energy_spread_rank, b), num(ev->energy_within1, c),
               num(ev->energy_within2, d));
        printf("%-22s %12s %16s %12s %12s\n", "force per atom", num(ev->force_spread_mean, a),
               num(ev->force_spread_rank, b), num(ev->force_within1, c), num(ev->force_within2, d));
    }
}

int cmd_evaluate(int argc, char **argv)
{
    eval_options o;
    int s = parse(argc, argv, &o);
    if (s)
        return s < 0 ? ND_EXIT_OK : s;
    if (o.threads > 0)
        omp_set_num_threads(o.threads);
    nd_error err;
    nd_model *m = NULL;
    if ((s = nd_model_load(o.model, &m, &err)))
        return cli_error(CMD, &err);
    nd_dataset *d = NULL;
    nd_dataset_report rep;
    if ((s = nd_dataset_load(&d, o.data, o.skip_bad ? ND_DATASET_SKIP_BAD : 0, &rep, &err))) {
        nd_model_free(m);
        return cli_error(CMD, &err);
    }
    if (rep.bad_lines)
        fprintf(stderr, "nadir evaluate: skipped %ld bad lines; the first: %s\n", rep.bad_lines,
                rep.first_bad);
    if (nd_dataset_count(d) == 0) {
        nd_dataset_free(d);
        nd_model_free(m);
        return cli_fail(CMD, ND_EINPUT, "%s: the dataset has no structures", o.data);
    }
    nd_evaluation ev;
    s = nd_evaluate_dataset(m, d, &ev, &err);
    if (s) {
        nd_error_prefix(&err, "%s", o.data);
        int code = cli_error(CMD, &err);
        nd_dataset_free(d);
        nd_model_free(m);
        return code;
    }
    int code = ND_EXIT_OK;
    if (o.json)
        code = write_json(&ev, o.model, o.data);
    else
        write_text(&ev);
    nd_dataset_free(d);
    nd_model_free(m);
    return code;
}
