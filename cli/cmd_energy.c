/* nadir energy: energy (and forces on request) of every record of a molecule
 * file under a learned-potential model, with the ensemble's uncertainty for
 * the energy, for the energy relative to the first record, and for forces. */
#include "cli/cli.h"

#include <getopt.h>
#include <limits.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

static const char *CMD = "energy";

typedef struct {
    const char *input;
    const char *model;
    nd_format format;
    int gradient, json;
    /* test helper: write a random-weight model and stop */
    const char *make_model;
    const char *elements;
    unsigned long long seed;
} energy_options;

static void usage(FILE *f)
{
    fprintf(f,
            "usage: nadir energy IN [--model FILE] [--gradient] [--json] [--format F]\n"
            "\n"
            "Energy of every record of IN under a learned potential, in kcal/mol, with the\n"
            "ensemble's uncertainty: the spread (sample standard deviation) of the member\n"
            "energies. Records with the same atoms as the first one also get their energy\n"
            "relative to it and the spread of that difference, which is usually much smaller\n"
            "than the spread of either energy. Coordinates are used as they are (no\n"
            "relaxation).\n"
            "\n"
            "  IN              .xyz, .sdf/.sd/.mol file (3D coordinates); '-' reads stdin\n"
            "  --model FILE    the model file; without it, the bundled model is looked for\n"
            "                  in SHARE/nadir/models/default.model next to the program and in\n"
            "                  potential/models/default.model\n"
            "  --gradient      also print the force on every atom (kcal/mol/angstrom, minus\n"
            "                  the gradient) and the largest per-atom force spread\n"
            "  --json          one JSON document instead of the table\n"
            "  --format F      read IN as F (xyz, sdf) whatever its name\n"
            "  --help          this text\n"
            "\n"
            "for tests:\n"
            "  --make-random-model OUT [--elements LIST] [--seed N]\n"
            "                  write a model with random weights (4 members, default\n"
            "                  descriptor; elements default H,C,N,O,F,S,Cl) to OUT and\n"
            "                  stop; its energies mean nothing\n"
            "\n"
            "examples:\n"
            "  nadir energy conformers.sdf --model organic.model\n"
            "  nadir energy frame.xyz --model organic.model --gradient --json > forces.json\n"
            "\n"
            "exit: 0 all records done, 5 some failed (each named on stderr), 3 none could be\n"
            "done (unreadable input, element or charge outside the model), 2 usage\n");
}

static int parse(int argc, char **argv, energy_options *o)
{
    static const struct option longopts[] = {{"model", required_argument, NULL, 'm'},
                                              {"gradient", no_argument, NULL, 'g'},
                                              {"json", no_argument, NULL, 'j'},
                                              {"format", required_argument, NULL, 'f'},
                                              {"make-random-model", required_argument, NULL, 'R'},
                                              {"elements", required_argument, NULL, 'E'},
                                              {"seed", required_argument, NULL, 'S'},
                                              {"help", no_argument, NULL, 'h'},
                                              {NULL, 0, NULL, 0}};
    memset(o, 0, sizeof *o);
    o->seed = 1;
    opterr = 0;
    optind = 1;
    int c, v;
    while ((c = getopt_long(argc, argv, ":h", longopts, NULL)) != -1) {
        switch (c) {
        case 'm': o->model = optarg; break;
        case 'g': o->gradient = 1; break;
        case 'j': o->json = 1; break;
        case 'f':
            o->format = nd_format_from_name(optarg);
            if (o->format == ND_FORMAT_AUTO)
                return cli_usage(CMD, "unknown format '%s'; expected xyz or sdf", optarg);
            break;
        case 'R': o->make_model = optarg; break;
        case 'E': o->elements = optarg; break;
        case 'S':
            if (cli_parse_int(optarg, &v) || v < 0)
                return cli_usage(CMD, "--seed needs a non-negative integer, got '%s'", optarg);
            o->seed = (unsigned long long)v;
            break;
        case 'h': usage(stdout); return -1;
        case ':': return cli_usage(CMD, "option %s needs a value", argv[optind - 1]);
        default: return cli_usage(CMD, "unknown option '%s'", argv[optind - 1]);
        }
    }
    if (o->make_model) {
        if (optind < argc)
            return cli_usage(CMD, "--make-random-model takes no input file");
        return 0;
    }
    if (o->elements)
        return cli_usage(CMD, "--elements only goes with --make-random-model");
    if (optind >= argc)
        return cli_usage(CMD, "no input file given");
    if (argc - optind > 1)
        return cli_usage(CMD, "one input file expected, got %d", argc - optind);
    o->input = argv[optind];
    return 0;
}

/* The test helper: a random-weight model over the listed elements. */
static int make_random_model(const energy_options *o)
{
    nd_model_spec s;
    nd_model_spec_defaults(&s);
    if (o->elements) {
        s.nelements = 0;
        char buf[256];
        snprintf(buf, sizeof buf, "%s", o->elements);
        for (char *t = strtok(buf, ","); t; t = strtok(NULL, ",")) {
            int z = nd_element_from_symbol(t, -1);
            if (!z)
                return cli_usage(CMD, "--elements: '%s' is not an element symbol", t);
            if (s.nelements == ND_MODEL_SPEC_MAX_ELEMENTS)
                return cli_usage(CMD, "--elements: at most %d elements", ND_MODEL_SPEC_MAX_ELEMENTS);
            s.z[s.nelements++] = z;
        }
        if (s.nelements == 0)
            return cli_usage(CMD, "--elements: no element given");
    }
    nd_error err;
    nd_model *m = NULL;
    if (nd_model_new(&m, &s, (uint64_t)o->seed, &err) != ND_OK ||
        nd_model_set_provenance(m,
                                "{\"origin\":\"random weights for tests\",\"reference\":\"none\"}",
                                &err) != ND_OK ||
        nd_model_save(m, o->make_model, &err) != ND_OK) {
        nd_model_free(m);
        return cli_error(CMD, &err);
    }
    nd_model_free(m);
    fprintf(stderr, "nadir %s: random-weight model written to %s (for tests only)\n", CMD,
            o->make_model);
    return ND_EXIT_OK;
}


/* Results of one record. */
typedef struct {
    int n, K;
    double energy, spread;
    double *member_e;  /* K */
    double *grad;      /* 3n, mean */
    double *member_g;  /* K * 3n */
    double force_spread;
} result;

/* The potential of the last record, kept for the next one with the same
 * atoms in the same order: frames of one molecule (a trajectory, a scan)
 * then skip the set-up (2.2 ms per frame of a 53-atom ligand before, most
 * of it the set-up and the caches it left cold). */
typedef struct {
    nd_potential *p;
    int n;
    int *z;
} pot_cache;

static void pot_cache_free(pot_cache *c)
{
    nd_potential_free(c->p);
    free(c->z);
    memset(c, 0, sizeof *c);
}

/* c->p made for mol's atoms (reused when they match). */
static int pot_cache_get(pot_cache *c, const nd_model *model, const nd_molecule *mol,
                         nd_error *err)
{
    if (c->p && c->n == mol->natoms && !memcmp(c->z, mol->z, sizeof(int) * (size_t)c->n))
        return ND_OK;
    pot_cache_free(c);
    c->z = malloc(sizeof(int) * (size_t)(mol->natoms ? mol->natoms : 1));
    if (!c->z)
        return nd_fail(err, ND_ENOMEM, "out of memory");
    int s = nd_potential_new(&c->p, model, mol->natoms, mol->z, ND_POTENTIAL_MEAN, err);
    if (s) {
        c->p = NULL;
        return s;
    }
    c->n = mol->natoms;
    memcpy(c->z, mol->z, sizeof(int) * (size_t)c->n);
    return ND_OK;
}

/* Evaluates mol; fills res (arrays malloc'd, freed by the caller). */
static int evaluate(const nd_model *model, pot_cache *pc, const nd_molecule *mol, int gradient,
                    result *res, nd_error *err)
{
    int s = nd_model_check(model, mol, err);
    if (s)
        return s;
    if (mol->dimension != 3 && mol->natoms > 1)
        return nd_fail(err, ND_EINPUT, "the record has no 3D coordinates (%s); nadir build makes "
                       "them from SMILES", mol->dimension == 2 ? "a 2D drawing" : "none at all");
    int n = mol->natoms, K = nd_model_members(model);
    res->n = n;
    res->K = K;
    res->member_e = malloc(sizeof(double) * (size_t)K);
    if (gradient) {
        res->grad = malloc(sizeof(double) * 3 * (size_t)(n ? n : 1));
        res->member_g = malloc(sizeof(double) * 3 * (size_t)(n ? n : 1) * (size_t)K);
    }
    if (!res->member_e || (gradient && (!res->grad || !res->member_g)))
        return nd_fail(err, ND_ENOMEM, "out of memory");
    s = pot_cache_get(pc, model, mol, err);
    if (s)
        return s;
    s = nd_potential_compute(pc->p, 1, mol->xyz, &res->energy, gradient ? res->grad : NULL,
                             res->member_e, gradient ? res->member_g : NULL, err);
    if (s)
        return s;
    nd_ensemble_stats(K, res->member_e, NULL, &res->spread);
    if (gradient)
        res->force_spread = nd_ensemble_force_spread(K, n, res->member_g);
    return ND_OK;
}

static void result_free(result *r)
{
    free(r->member_e);
    free(r->grad);
    free(r->member_g);
    memset(r, 0, sizeof *r);
}

/* Whether two molecules have the same element list (so a relative energy
 * means something). */
static int same_atoms(const int *za, int na, const nd_molecule *b)
{
    if (na != b->natoms)
        return 0;
    for (int i = 0; i < na; i++)
        if (za[i] != b->z[i])
            return 0;
    return 1;
}

int cmd_energy(int argc, char **argv)
{
    energy_options o;
    int rc = parse(argc, argv, &o);
    if (rc != 0)
        return rc < 0 ? ND_EXIT_OK : rc;
    if (o.make_model)
        return make_random_model(&o);

    char mpath[PATH_MAX + 64];
    if ((rc = cli_model_path(CMD, o.model, 0, mpath, sizeof mpath)) != 0)
        return rc;

    nd_error err;
    nd_error_clear(&err);
    nd_model *model = NULL;
    nd_reader *r = NULL;
    nd_molecule mol;
    nd_molecule_init(&mol);
    cJSON *doc = NULL, *records = NULL, *failures = NULL;
    int *first_z = NULL, first_n = -1, done = 0, failed = 0, header = 0;
    double *first_me = NULL;
    result res;
    memset(&res, 0, sizeof res);
    pot_cache pc = {0};
    rc = ND_EXIT_OK;

    if (nd_model_load(mpath, &model, &err) != ND_OK) {
        rc = cli_error(CMD, &err);
        goto out;
    }
    cli_model_notice(CMD, mpath, model);
    int K = nd_model_members(model);
    if ((rc = cli_open_structures(CMD, o.input, o.format, &r)) != 0)
        goto out;
    if (o.json) {
        doc = cJSON_CreateObject();
        cJSON *jm = cJSON_AddObjectToObject(doc, "model");
        const int *mz;
        int nel = nd_model_elements(model, &mz);
        cJSON *el = cJSON_AddArrayToObject(jm, "elements");
        for (int i = 0; i < nel; i++)
            cJSON_AddItemToArray(el, cJSON_CreateString(nd_element_symbol(mz[i])));
        cJSON_AddStringToObject(jm, "file", mpath);
        cJSON_AddNumberToObject(jm, "members", K);
        cJSON_AddBoolToObject(jm, "neutral_only", nd_model_neutral_only(model));
        cJSON *prov = cJSON_Parse(nd_model_provenance(model));
        cJSON_AddItemToObject(jm, "provenance", prov ? prov : cJSON_CreateObject());
        cJSON_AddStringToObject(doc, "file", nd_reader_name(r));
        cJSON_AddStringToObject(doc, "energy_unit", "kcal/mol");
        cJSON_AddStringToObject(doc, "force_unit", "kcal/mol/angstrom");
        records = cJSON_AddArrayToObject(doc, "records");
        failures = cJSON_CreateArray();
        if (!records || !failures)
            goto nomem;
    }
    for (;;) {
        int s = nd_reader_next(r, &mol, &err);
        if (s == ND_END)
            break;
        int rec = nd_reader_record(r);
        int read_failed = s != ND_OK; /* the reader's message names file and record */
        if (s == ND_OK)
            s = evaluate(model, &pc, &mol, o.gradient, &res, &err);
        if (s == ND_ENOMEM)
            goto nomem;
        if (s != ND_OK) {
            failed++;
            if (read_failed)
                fprintf(stderr, "nadir %s: %s\n", CMD, err.msg);
            else {
                char close[96] = "";
                if (s == ND_ECOMPUTE)
                    cli_close_contact(&mol, close, sizeof close);
                fprintf(stderr, "nadir %s: %s, record %d: %s%s\n", CMD, nd_reader_name(r), rec,
                        err.msg, close);
            }
            if (failures) {
                cJSON *f = cJSON_CreateObject();
                cJSON_AddItemToArray(failures, f);
                cJSON_AddNumberToObject(f, "record", rec);
                cJSON_AddStringToObject(f, "message", err.msg);
            }
            result_free(&res);
            if (s != ND_EINPUT && s != ND_EDOMAIN && s != ND_ECOMPUTE)
                break; /* the reader may not go on after other errors */
            continue;
        }
        done++;
        /* relative energy to the first successful record with the same atoms */
        int have_rel = 0;
        double rel = 0, rel_spread = 0;
        if (first_n < 0) {
            first_n = mol.natoms;
            first_z = malloc(sizeof(int) * (size_t)(mol.natoms ? mol.natoms : 1));
            first_me = malloc(sizeof(double) * (size_t)K);
            if (!first_z || !first_me)
                goto nomem;
            memcpy(first_z, mol.z, sizeof(int) * (size_t)mol.natoms);
            memcpy(first_me, res.member_e, sizeof(double) * (size_t)K);
        }
        if (same_atoms(first_z, first_n, &mol)) {
            have_rel = 1;
            rel_spread = nd_ensemble_difference_spread(K, res.member_e, first_me, &rel);
        }
        const char *title = mol.title ? mol.title : "";
        char where[300];
        snprintf(where, sizeof where, "%s, record %d", nd_reader_name(r), rec);
        int outside = cli_size_note(CMD, model, &mol, where);
        if (o.json) {
            cJSON *j = cJSON_CreateObject();
            cJSON_AddItemToArray(records, j);
            cJSON_AddNumberToObject(j, "record", rec);
            cJSON_AddStringToObject(j, "title", title);
            cJSON_AddNumberToObject(j, "atoms", mol.natoms);
            cJSON_AddBoolToObject(j, "outside_training_sizes", outside);
            cJSON_AddNumberToObject(j, "energy", res.energy);
            if (K > 1) /* one member has no spread: null, not a zero uncertainty */
                cJSON_AddNumberToObject(j, "energy_spread", res.spread);
            else
                cJSON_AddNullToObject(j, "energy_spread");
            nd_report_add_numbers(j, "member_energies", res.member_e, K, NULL);
            if (have_rel) {
                cJSON_AddNumberToObject(j, "energy_vs_first", rel);
                if (K > 1)
                    cJSON_AddNumberToObject(j, "energy_vs_first_spread", rel_spread);
                else
                    cJSON_AddNullToObject(j, "energy_vs_first_spread");
            }
            if (o.gradient) {
                cJSON *fa = cJSON_AddArrayToObject(j, "forces");
                for (int i = 0; i < mol.natoms; i++) {
                    double fv[3] = {0.0 - res.grad[3 * i], 0.0 - res.grad[3 * i + 1], 0.0 - res.grad[3 * i + 2]};
                    cJSON_AddItemToArray(fa, cJSON_CreateDoubleArray(fv, 3));
                }
                if (K > 1)
                    cJSON_AddNumberToObject(j, "force_spread_max", res.force_spread);
                else
                    cJSON_AddNullToObject(j, "force_spread_max");
            }
        } else {
            if (!header || o.gradient) {
                printf("%6s  %-24s  %6s  %16s  %10s  %14s  %10s\n", "record", "title", "atoms",
                       "energy", "spread", "vs first", "spread");
                header = 1;
            }
            char rels[32] = "-", rsp[32] = "-", sp[32] = "-";
            if (have_rel) {
                snprintf(rels, sizeof rels, "%.4f", rel);
                if (K > 1)
                    snprintf(rsp, sizeof rsp, "%.4f", rel_spread);
            }
            if (K > 1)
                snprintf(sp, sizeof sp, "%.4f", res.spread);
            printf("%6d  %-24.24s  %6d  %16.4f  %10s  %14s  %10s\n", rec, title, mol.natoms,
                   res.energy, sp, rels, rsp);
            if (o.gradient) {
                printf("        %5s  %-4s  %14s  %14s  %14s\n", "atom", "elem", "force x", "force y",
                       "force z");
                for (int i = 0; i < mol.natoms; i++)
                    printf("        %5d  %-4s  %14.6f  %14.6f  %14.6f\n", i + 1,
                           nd_element_symbol(mol.z[i]), 0.0 - res.grad[3 * i], 0.0 - res.grad[3 * i + 1],
                           0.0 - res.grad[3 * i + 2]);
                if (K > 1)
                    printf("        largest per-atom force spread %.4f kcal/mol/angstrom\n\n",
                           res.force_spread);
                else
                    printf("\n");
            }
        }
        result_free(&res);
    }
    if (!o.json && done > 0) {
        if (K > 1)
            printf("energies in kcal/mol (mean of %d ensemble members; spread = their sample "
                   "standard deviation)%s\n",
                   K, o.gradient ? "; forces in kcal/mol/angstrom" : "");
        else
            printf("energies in kcal/mol (a model of one member: no ensemble, so no spread)%s\n",
                   o.gradient ? "; forces in kcal/mol/angstrom" : "");
    }
    if (o.json) {
        cJSON_AddNumberToObject(doc, "done", done);
        cJSON_AddNumberToObject(doc, "failed", failed);
        cJSON_AddItemToObject(doc, "failures", failures);
        failures = NULL;
        if (nd_report_write(doc, "-", &err) != ND_OK) {
            rc = cli_error(CMD, &err);
            goto out;
        }
    }
    if (failed > 0) {
        fprintf(stderr, "nadir %s: %d record%s done, %d failed\n", CMD, done, done == 1 ? "" : "s",
                failed);
        rc = done > 0 ? ND_EXIT_PARTIAL : ND_EXIT_INPUT;
    }
    goto out;
nomem:
    rc = cli_fail(CMD, ND_ENOMEM, "out of memory");
out:
    result_free(&res);
    pot_cache_free(&pc);
    free(first_z);
    free(first_me);
    cJSON_Delete(failures);
    cJSON_Delete(doc);
    nd_molecule_free(&mol);
    nd_reader_close(r);
    nd_model_free(model);
    return rc;
}
