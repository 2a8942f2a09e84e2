/* nadir conformers: the main job. For every molecule of the input (a SMILES
 * string, or a file of SMILES, SD or XYZ records), a conformer search under
 * a potential (a model file or an external program), then the ranked,
 * verified minima as an SD file, a table on stdout and a JSON report. */
#include "cli/cli.h"

#include <getopt.h>
#include <limits.h>
#include <math.h>
#include <omp.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

static const char *CMD = "conformers";

typedef struct {
    const char *input;
    const char *output;
    const char *report;
    const char *model;
    const char *command;
    nd_format format;
    double timeout;
    int threads;
    nd_search_options search;
} conf_options;

static void usage(FILE *f)
{
    fprintf(f,
            "usage: nadir conformers IN [-o OUT.sdf] [--report FILE.json] [--window KCAL]\n"
            "                          [--max N] [--rmsd A] [--seed S] [--free-energy] [--threads N]\n"
            "                          [--model FILE | --potential-command CMD]\n"
            "\n"
            "Low-energy conformers of every molecule of IN. Each molecule is built in 3D\n"
            "(SMILES) or taken as given (SD, XYZ), its rotatable bonds, saturated rings and\n"
            "pyramidal nitrogens are sampled (every combination when they are few, otherwise\n"
            "mutations of the best minima found so far), every candidate is relaxed, checked\n"
            "for unchanged bonds and stereo, and duplicates are removed by RMSD. Each reported\n"
            "conformer is confirmed a minimum by a normal-mode analysis (repaired when it had\n"
            "imaginary modes), then ranked with relative energies and Boltzmann weights.\n"
            "\n"
            "  IN                   a SMILES string, or a file: .smi (one SMILES per line, name\n"
            "                       after it), .sdf/.sd/.mol, .xyz (bonds perceived, all single);\n"
            "                       '-' reads stdin\n"
            "  -o, --output FILE    SD file of the conformers, one record per conformer, with the\n"
            "                       input's data items and: conformer_rank, energy_kcal_per_mol,\n"
            "                       relative_energy_kcal_per_mol, boltzmann_weight,\n"
            "                       lowest_frequency_per_cm, imaginary_modes_repaired and, when\n"
            "                       known, free_energy_kcal_per_mol,\n"
            "                       relative_free_energy_kcal_per_mol,\n"
            "                       energy_uncertainty_kcal_per_mol, model_unsure,\n"
            "                       mirror_image_of_rank (mirror-image pairs, such as the\n"
            "                       two gauche forms of butane, are both listed: both are\n"
            "                       populated; the table notes them)\n"
            "  --report FILE        JSON report: every conformer and the search's counts\n"
            "  --window KCAL        report conformers within KCAL of the lowest (5; -1: all)\n"
            "  --max N              report at most N conformers (0: no limit, the default)\n"
            "  --rmsd A             heavy-atom RMSD below which two minima are one (0.125)\n"
            "  --energy-tol KCAL    minima further apart in energy are always distinct (0.05)\n"
            "  --seed S             random seed (1); the same seed gives the same output\n"
            "  --temperature K      for Boltzmann weights and free energies (298.15)\n"
            "  --free-energy        rank by free energy (harmonic RRHO from the normal modes)\n"
            "  --max-tries N        budget: candidates per molecule at most (2000)\n"
            "  --quiet-rounds K     stop after K batches of 16 candidates with no new minimum in\n"
            "                       the window (3)\n"
            "  --unsure-above KCAL  mark conformers whose relative energy's ensemble spread is\n"
            "                       above KCAL (0.5)\n"
            "  --threads N          OpenMP threads (default: all); results do not depend on it\n"
            "  --model FILE         learned-potential model file\n"
            "  --potential-command CMD\n"
            "                       an external program as the potential (see DEVELOPERS.md,\n"
            "                       nadir-external/1 protocol), e.g. tools/xtb-single-point\n"
            "  --timeout S          limit of one external evaluation, seconds (600)\n"
            "  --format F           read IN as F (smi, sdf, xyz) whatever its name\n"
            "  --help               this text\n"
            "\n"
            "Without --model or --potential-command the bundled model is used (a pilot\n"
            "model: see README.md for its domain and accuracy).\n"
            "\n"
            "examples:\n"
            "  nadir conformers 'CCCC' --potential-command tools/xtb-single-point\n"
            "  nadir conformers ligands.smi --model organic.model -o confs.sdf --report r.json\n"
            "\n"
            "exit: 0 every molecule done, 5 some failed (each named on stderr), 3 bad input,\n"
            "4 the computation failed, 2 usage\n");
}

static int parse(int argc, char **argv, conf_options *o)
{
    enum { O_REPORT = 256, O_WINDOW, O_MAX, O_RMSD, O_ETOL, O_SEED, O_TEMP, O_FREE, O_TRIES,
           O_QUIET, O_UNSURE, O_THREADS, O_MODEL, O_COMMAND, O_TIMEOUT, O_FORMAT };
    static const struct option longopts[] = {{"output", required_argument, NULL, 'o'},
                                              {"report", required_argument, NULL, O_REPORT},
                                              {"window", required_argument, NULL, O_WINDOW},
                                              {"max", required_argument, NULL, O_MAX},
                                              {"rmsd", required_argument, NULL, O_RMSD},
                                              {"energy-tol", required_argument, NULL, O_ETOL},
                                              {"seed", required_argument, NULL, O_SEED},
                                              {"temperature", required_argument, NULL, O_TEMP},
                                              {"free-energy", no_argument, NULL, O_FREE},
                                              {"max-tries", required_argument, NULL, O_TRIES},
                                              {"quiet-rounds", required_argument, NULL, O_QUIET},
                                              {"unsure-above", required_argument, NULL, O_UNSURE},
                                              {"threads", required_argument, NULL, O_THREADS},
                                              {"model", required_argument, NULL, O_MODEL},
                                              {"potential-command", required_argument, NULL, O_COMMAND},
                                              {"timeout", required_argument, NULL, O_TIMEOUT},
                                              {"format", required_argument, NULL, O_FORMAT},
                                              {"help", no_argument, NULL, 'h'},
                                              {NULL, 0, NULL, 0}};
    memset(o, 0, sizeof *o);
    nd_search_options_default(&o->search);
    o->timeout = 600;
    opterr = 0;
    optind = 1;
    int c, v;
    double d;
    while ((c = getopt_long(argc, argv, ":ho:", longopts, NULL)) != -1) {
        switch (c) {
        case 'o': o->output = optarg; break;
        case O_REPORT: o->report = optarg; break;
        case O_WINDOW:
            if (cli_parse_double(optarg, &d))
                return cli_usage(CMD, "--window needs a number of kcal/mol, got '%s'", optarg);
            o->search.window = d < 0 ? -1 : d;
            break;
        case O_MAX:
            if (cli_parse_int(optarg, &v) || v < 0)
                return cli_usage(CMD, "--max needs a count >= 0, got '%s'", optarg);
            o->search.max_conformers = v;
            break;
        case O_RMSD:
            if (cli_parse_double(optarg, &d) || d <= 0)
                return cli_usage(CMD, "--rmsd needs a positive number of angstrom, got '%s'", optarg);
            o->search.dedup.rmsd = d;
            break;
        case O_ETOL:
            if (cli_parse_double(optarg, &d) || d < 0)
                return cli_usage(CMD, "--energy-tol needs a number >= 0, got '%s'", optarg);
            o->search.dedup.energy_tol = d;
            break;
        case O_SEED:
            if (cli_parse_int(optarg, &v) || v < 0)
                return cli_usage(CMD, "--seed needs a non-negative integer, got '%s'", optarg);
            o->search.seed = (uint64_t)v;
            break;
        case O_TEMP:
            if (cli_parse_double(optarg, &d) || d <= 0)
                return cli_usage(CMD, "--temperature needs a positive number of kelvin, got '%s'",
                                 optarg);
            o->search.temperature = d;
            break;
        case O_FREE: o->search.free_energy = 1; break;
        case O_TRIES:
            if (cli_parse_int(optarg, &v) || v < 1)
                return cli_usage(CMD, "--max-tries needs a count >= 1, got '%s'", optarg);
            o->search.max_tries = v;
            break;
        case O_QUIET:
            if (cli_parse_int(optarg, &v) || v < 1)
                return cli_usage(CMD, "--quiet-rounds needs a count >= 1, got '%s'", optarg);
            o->search.quiet_rounds = v;
            break;
        case O_UNSURE:
            if (cli_parse_double(optarg, &d) || d < 0)
                return cli_usage(CMD, "--unsure-above needs a number >= 0, got '%s'", optarg);
            o->search.uncertainty_mark = d;
            break;
        case O_THREADS:
            if (cli_parse_int(optarg, &v) || v < 1)
                return cli_usage(CMD, "--threads needs a count >= 1, got '%s'", optarg);
            o->threads = v;
            break;
        case O_MODEL: o->model = optarg; break;
        case O_COMMAND: o->command = optarg; break;
        case O_TIMEOUT:
            if (cli_parse_double(optarg, &d) || d <= 0)
                return cli_usage(CMD, "--timeout needs a positive number of seconds, got '%s'", optarg);
            o->timeout = d;
            break;
        case O_FORMAT:
            o->format = nd_format_from_name(optarg);
            if (o->format == ND_FORMAT_AUTO)
                return cli_usage(CMD, "unknown format '%s'; expected smi, sdf or xyz", optarg);
            break;
        case 'h': usage(stdout); return -1;
        case ':': return cli_usage(CMD, "option %s needs a value", argv[optind - 1]);
        default: return cli_usage(CMD, "unknown option '%s'", argv[optind - 1]);
        }
    }
    if (optind >= argc)
        return cli_usage(CMD, "no input given (a SMILES string or a file)");
    if (argc - optind > 1)
        return cli_usage(CMD, "one input expected, got %d", argc - optind);
    o->input = argv[optind];
    if (o->model && o->command)
        return cli_usage(CMD, "--model and --potential-command exclude each other");
    return 0;
}


/* The potential of one molecule: a model bound to its atoms, or an
 * external program. */
typedef struct {
    nd_potential *pot;
    nd_external *ext;
    nd_energy energy;
} mol_potential;

/* Ensemble callback for the search: per-member energies from the model. */
static int members_cb(void *ctx, int n, int m, const double *x, double *member_e)
{
    (void)n;
    return nd_ensemble_members((nd_potential *)ctx, m, x, member_e, NULL, NULL);
}

static int potential_open(const conf_options *o, const nd_model *model, const nd_molecule *mol,
                          mol_potential *mp, nd_error *err)
{
    memset(mp, 0, sizeof *mp);
    int s;
    if (model) {
        if ((s = nd_model_check(model, mol, err)) != ND_OK)
            return s;
        if ((s = nd_potential_new(&mp->pot, model, mol->natoms, mol->z, ND_POTENTIAL_MEAN, err)))
            return s;
        mp->energy = nd_potential_energy(mp->pot);
        return ND_OK;
    }
    int charge = mol->charge ? mol->charge : nd_molecule_formal_charge_sum(mol);
    if ((s = nd_external_new(&mp->ext, o->command, mol->natoms, mol->z, charge,
                             mol->multiplicity > 0 ? mol->multiplicity : 1, o->timeout, err)))
        return s;
    mp->energy = nd_external_energy(mp->ext);
    return ND_OK;
}

static void potential_close(mol_potential *mp)
{
    nd_potential_free(mp->pot);
    nd_external_free(mp->ext);
    memset(mp, 0, sizeof *mp);
}

/* Sets a numeric data item with a fixed format. */
static int set_number(nd_molecule *m, const char *name, const char *fmt, double v, nd_error *err)
{
    char buf[64];
    snprintf(buf, sizeof buf, fmt, v);
    return nd_molecule_set_data(m, name, buf, err);
}

/* Writes the conformers of one molecule to the SD writer: copies of the
 * input molecule (title, data items) with the conformer's coordinates and
 * the conformer's data items added. */
static int write_conformers(nd_writer *w, const nd_molecule *in, const nd_search *s, int free_energy,
                            nd_error *err)
{
    nd_molecule out;
    nd_molecule_init(&out);
    int st = ND_OK;
    for (int r = 0; r < nd_search_count(s) && st == ND_OK; r++) {
        const nd_conformer *c = nd_search_conformer(s, r);
        if ((st = nd_molecule_copy(&out, in, err)) != ND_OK)
            break;
        memcpy(out.xyz, c->xyz, 3 * (size_t)in->natoms * sizeof *out.xyz);
        out.dimension = 3;
        if (!out.has_bonds) { /* keep the bond table the search used */
            const nd_molecule *sm = nd_search_molecule(s);
            for (int b = 0; b < sm->nbonds && st == ND_OK; b++)
                st = nd_molecule_add_bond(&out, sm->bonds[b].a, sm->bonds[b].b, sm->bonds[b].order, err);
            out.has_bonds = 1;
        }
        if (st == ND_OK)
            st = set_number(&out, "conformer_rank", "%.0f", r + 1.0, err);
        if (st == ND_OK)
            st = set_number(&out, "energy_kcal_per_mol", "%.6f", c->energy, err);
        if (st == ND_OK)
            st = set_number(&out, "relative_energy_kcal_per_mol", "%.4f", c->rel_energy, err);
        if (st == ND_OK && free_energy)
            st = set_number(&out, "free_energy_kcal_per_mol", "%.6f", c->free_energy, err);
        if (st == ND_OK && free_energy)
            st = set_number(&out, "relative_free_energy_kcal_per_mol", "%.4f", c->rel_free_energy, err);
        if (st == ND_OK)
            st = set_number(&out, "boltzmann_weight", "%.6f", c->weight, err);
        if (st == ND_OK && isfinite(c->lowest_freq))
            st = set_number(&out, "lowest_frequency_per_cm", "%.2f", c->lowest_freq, err);
        if (st == ND_OK)
            st = nd_molecule_set_data(&out, "imaginary_modes_repaired", c->repaired ? "yes" : "no", err);
        if (st == ND_OK && isfinite(c->uncertainty)) {
            st = set_number(&out, "energy_uncertainty_kcal_per_mol", "%.4f", c->uncertainty, err);
            if (st == ND_OK)
                st = nd_molecule_set_data(&out, "model_unsure", c->uncertain ? "yes" : "no", err);
        }
        if (st == ND_OK && c->mirror_of >= 0)
            st = set_number(&out, "mirror_image_of_rank", "%.0f", c->mirror_of + 1.0, err);
        if (st == ND_OK)
            st = nd_writer_write(w, &out, err);
    }
    nd_molecule_free(&out);
    return st;
}

/* The search counts as a JSON object. */
static cJSON *stats_json(const nd_search_counts *c, double seconds)
{
    cJSON *j = cJSON_CreateObject();
    cJSON_AddNumberToObject(j, "rotors", c->rotors);
    cJSON_AddNumberToObject(j, "ring_flips", c->ring_flips);
    cJSON_AddNumberToObject(j, "nitrogen_inversions", c->inversions);
    cJSON_AddNumberToObject(j, "combinations", c->combinations);
    cJSON_AddBoolToObject(j, "all_combinations_tried", c->systematic);
    cJSON_AddNumberToObject(j, "candidates_tried", (double)c->tried);
    cJSON_AddNumberToObject(j, "candidates_relaxed", (double)c->relaxed);
    cJSON *rej = cJSON_AddObjectToObject(j, "candidates_rejected");
    cJSON_AddNumberToObject(rej, "clash_before_relaxation", (double)c->clashes);
    cJSON_AddNumberToObject(rej, "embedding_failed", (double)c->embed_failed);
    cJSON_AddNumberToObject(rej, "not_converged", (double)c->not_converged);
    cJSON_AddNumberToObject(rej, "potential_failed", (double)c->failed);
    cJSON_AddNumberToObject(rej, "bonding_changed", (double)c->rejected_bonding);
    cJSON_AddNumberToObject(rej, "stereocentre_inverted", (double)c->rejected_stereo);
    cJSON_AddNumberToObject(rej, "double_bond_isomerised", (double)c->rejected_double_bond);
    cJSON_AddNumberToObject(j, "duplicates", (double)c->duplicates);
    cJSON_AddNumberToObject(j, "distinct_minima_found", c->minima);
    cJSON_AddNumberToObject(j, "batches", c->batches);
    cJSON_AddStringToObject(j, "stop_reason", nd_search_stop_name(c->stop));
    cJSON *chk = cJSON_AddObjectToObject(j, "minimum_check");
    cJSON_AddNumberToObject(chk, "checked", c->checked);
    cJSON_AddNumberToObject(chk, "repaired", c->repaired);
    cJSON_AddNumberToObject(chk, "not_a_minimum_after_repair", c->not_minimum);
    cJSON_AddNumberToObject(chk, "changed_during_check", c->changed_in_check);
    cJSON_AddNumberToObject(chk, "merged_after_check", c->merged_in_check);
    cJSON *fc = cJSON_AddObjectToObject(j, "force_calls");
    cJSON_AddNumberToObject(fc, "sampling", (double)c->force_calls);
    cJSON_AddNumberToObject(fc, "final_minimisation", (double)c->check_force_calls);
    cJSON_AddNumberToObject(fc, "hessians", (double)c->hessian_calls);
    cJSON_AddNumberToObject(fc, "total",
                            (double)(c->force_calls + c->check_force_calls + c->hessian_calls));
    cJSON_AddNumberToObject(j, "time_seconds", seconds);
    return j;
}

/* One conformer as JSON (non-finite numbers become null). */
static cJSON *conformer_json(const nd_conformer *c, int rank, int natoms, const int *z)
{
    cJSON *j = cJSON_CreateObject();
    cJSON_AddNumberToObject(j, "rank", rank);
    cJSON_AddNumberToObject(j, "energy", c->energy);
    cJSON_AddNumberToObject(j, "relative_energy", c->rel_energy);
    double v[4] = {c->free_energy, c->rel_free_energy, c->lowest_freq, c->uncertainty};
    const char *names[4] = {"free_energy", "relative_free_energy", "lowest_frequency",
                            "energy_uncertainty"};
    for (int k = 0; k < 4; k++) {
        if (isfinite(v[k]))
            cJSON_AddNumberToObject(j, names[k], v[k]);
        else
            cJSON_AddNullToObject(j, names[k]);
    }
    cJSON_AddNumberToObject(j, "boltzmann_weight", c->weight);
    cJSON_AddBoolToObject(j, "confirmed_minimum", c->checked);
    cJSON_AddBoolToObject(j, "imaginary_modes_repaired", c->repaired);
    if (isfinite(c->uncertainty))
        cJSON_AddBoolToObject(j, "model_unsure", c->uncertain);
    cJSON_AddNumberToObject(j, "found_at_candidate", (double)c->found_at);
    if (c->mirror_of >= 0)
        cJSON_AddNumberToObject(j, "mirror_image_of_rank", c->mirror_of + 1);
    else
        cJSON_AddNullToObject(j, "mirror_image_of_rank");
    cJSON *xyz = cJSON_AddArrayToObject(j, "coordinates");
    for (int i = 0; i < natoms; i++) {
        cJSON *a = cJSON_CreateArray();
        cJSON_AddItemToArray(a, cJSON_CreateString(nd_element_symbol(z[i])));
        for (int k = 0; k < 3; k++)
            cJSON_AddItemToArray(a, cJSON_CreateNumber(c->xyz[3 * i + k]));
        cJSON_AddItemToArray(xyz, a);
    }
    return j;
}

/* Prints the ranked table of one molecule. */
static void print_table(int rec, const nd_molecule *mol, const nd_search *s, int free_energy,
                        double temperature, double seconds)
{
    char formula[128];
    nd_molecule_formula(mol, formula, sizeof formula);
    const nd_search_counts *c = nd_search_stats(s);
    printf("molecule %d: %s (%s), %d conformer%s; %ld candidates, %d minima, stop: %s, %.1f s\n",
           rec, mol->title && mol->title[0] ? mol->title : "untitled", formula, nd_search_count(s),
           nd_search_count(s) == 1 ? "" : "s", c->tried, c->minima, nd_search_stop_name(c->stop),
           seconds);
    printf("  %4s  %16s  %9s", "rank", "energy", "rel.E");
    if (free_energy)
        printf("  %9s", "rel.G");
    printf("  %7s  %11s  %11s  %s\n", "weight", "lowest freq", "uncertainty", "notes");
    int any_noise = 0;
    for (int r = 0; r < nd_search_count(s); r++) {
        const nd_conformer *f = nd_search_conformer(s, r);
        printf("  %4d  %16.4f  %9.3f", r + 1, f->energy, f->rel_energy);
        if (free_energy)
            printf("  %9.3f", f->rel_free_energy);
        char unc[32] = "-";
        if (isfinite(f->uncertainty))
            snprintf(unc, sizeof unc, "%.3f", f->uncertainty);
        /* notes joined by "; " (run together they read "of 3 model unsure") */
        char notes[96] = "";
        size_t len = 0;
        if (f->mirror_of >= 0)
            len += (size_t)snprintf(notes, sizeof notes, "mirror image of %d", f->mirror_of + 1);
        if (f->repaired && len < sizeof notes)
            len += (size_t)snprintf(notes + len, sizeof notes - len, "%srepaired", len ? "; " : "");
        /* a confirmed minimum may keep a noise-level negative frequency
         * (optimize/modes.h): say so, or the column reads as a saddle */
        if (f->checked && f->lowest_freq < 0 && len < sizeof notes) {
            len += (size_t)snprintf(notes + len, sizeof notes - len, "%snoise-level mode",
                                    len ? "; " : "");
            any_noise = 1;
        }
        if (f->uncertain && len < sizeof notes)
            snprintf(notes + len, sizeof notes - len, "%smodel unsure", len ? "; " : "");
        printf("  %7.4f  %11.1f  %11s  %s\n", f->weight, f->lowest_freq, unc, notes);
    }
    printf("  energies in kcal/mol; %s in kcal/mol relative to the lowest; Boltzmann weights at "
           "%.2f K; frequencies in cm^-1\n",
           free_energy ? "rel.E and rel.G" : "rel.E", temperature);
    if (any_noise)
        printf("  noise-level mode: an imaginary frequency below %.0f cm^-1 at a converged structure, "
               "within the\n  finite-difference Hessian's noise: still counted a minimum (left out "
               "of the thermochemistry)\n",
               ND_MODES_NOISE_FREQ);
    printf("\n");
}

/* Runs the whole search of one molecule, with a progress line on a
 * terminal. *seconds receives the wall time. */
static int search_one(const conf_options *o, const nd_model *model, nd_molecule *mol, int rec,
                      nd_search **out, double *seconds, nd_error *err)
{
    *out = NULL;
    double t0 = nd_progress_clock();
    char close[96];
    /* atoms on top of each other: bonds perceived or sampled from such a
     * structure mean nothing, so say so instead of failing the search */
    if (mol->dimension == 3 && cli_close_contact(mol, close, sizeof close))
        return nd_fail(err, ND_EINPUT, "the 3D structure is not usable%s; fix the file or give "
                       "SMILES", close);
    if (mol->dimension == 3 && !mol->has_bonds && mol->natoms > 1) {
        int s = nd_verify_perceive_bonds(mol, err);
        if (s)
            return s;
    }
    mol_potential mp;
    int s = potential_open(o, model, mol, &mp, err);
    if (s)
        return s;
    nd_search_options so = o->search;
    if (mp.pot) {
        so.members = members_cb;
        so.members_ctx = mp.pot;
        so.members_k = nd_model_members(model);
    }
    nd_search *srch = NULL;
    s = nd_search_new(&srch, mol, &mp.energy, &so, err);
    if (s == ND_OK) {
        nd_progress p;
        char label[40];
        snprintf(label, sizeof label, "molecule %d: candidates", rec);
        nd_progress_start(&p, label, so.max_tries);
        while ((s = nd_search_step(srch, err)) == ND_CONTINUE)
            nd_progress_update(&p, nd_search_stats(srch)->tried);
        nd_progress_finish(&p);
        if (s == ND_OK)
            s = nd_search_finish(srch, err);
    }
    if (s != ND_OK && mp.ext && err && err->code == ND_EEXTERNAL && !err->msg[0])
        nd_external_last_error(mp.ext, err);
    potential_close(&mp);
    *seconds = nd_progress_clock() - t0;
    if (s != ND_OK) {
        nd_search_free(srch);
        return s;
    }
    *out = srch;
    return ND_OK;
}

/* 1 if s names an existing file or stdin. */
static int is_file(const char *s)
{
    return strcmp(s, "-") == 0 || access(s, F_OK) == 0;
}

int cmd_conformers(int argc, char **argv)
{
    conf_options o;
    int rc = parse(argc, argv, &o);
    if (rc != 0)
        return rc < 0 ? ND_EXIT_OK : rc;
    if (o.threads > 0)
        omp_set_num_threads(o.threads);
    /* fail before a long run, not after it, when a result cannot be written */
    if ((rc = cli_check_output(CMD, "--output", o.output)) != 0 ||
        (rc = cli_check_output(CMD, "--report", o.report)) != 0)
        return rc;

    char mpath[PATH_MAX + 64];
    if (!o.model && !o.command) {
        if ((rc = cli_model_path(CMD, NULL, 1, mpath, sizeof mpath)) != 0)
            return rc;
        o.model = mpath;
    }

    nd_error err;
    nd_error_clear(&err);
    nd_model *model = NULL;
    nd_reader *r = NULL;
    nd_writer *w = NULL;
    nd_molecule mol;
    nd_molecule_init(&mol);
    cJSON *doc = NULL, *mols = NULL;
    int done = 0, failed = 0, last_fail = ND_OK;
    rc = ND_EXIT_OK;

    if (o.model && nd_model_load(o.model, &model, &err) != ND_OK) {
        rc = cli_error(CMD, &err);
        goto out;
    }
    if (model)
        cli_model_notice(CMD, o.model, model);
    int from_string = !is_file(o.input);
    if (from_string) {
        /* a SMILES string on the command line, read as a one-line SMILES file */
        if (nd_reader_open_memory(&r, "command line", o.input, strlen(o.input), ND_FORMAT_SMILES,
                                  &err) != ND_OK) {
            rc = cli_error(CMD, &err);
            goto out;
        }
    } else if (nd_reader_open(&r, o.input, o.format, &err) != ND_OK) {
        rc = cli_error(CMD, &err);
        goto out;
    }
    if (o.output && nd_writer_open(&w, o.output, ND_FORMAT_SDF, &err) != ND_OK) {
        rc = cli_error(CMD, &err);
        goto out;
    }
    if (o.report) {
        doc = cJSON_CreateObject();
        cJSON_AddStringToObject(doc, "program", "nadir conformers");
        cJSON_AddStringToObject(doc, "version", ND_VERSION);
        cJSON_AddStringToObject(doc, "input", o.input);
        cJSON *jp = cJSON_AddObjectToObject(doc, "potential");
        if (model) {
            cJSON_AddStringToObject(jp, "kind", "model");
            cJSON_AddStringToObject(jp, "file", o.model);
            cJSON_AddNumberToObject(jp, "members", nd_model_members(model));
        } else {
            cJSON_AddStringToObject(jp, "kind", "external program");
            cJSON_AddStringToObject(jp, "command", o.command);
        }
        cJSON *js = cJSON_AddObjectToObject(doc, "settings");
        cJSON_AddNumberToObject(js, "seed", (double)o.search.seed);
        cJSON_AddNumberToObject(js, "window_kcal_per_mol", o.search.window);
        cJSON_AddNumberToObject(js, "max_conformers", o.search.max_conformers);
        cJSON_AddNumberToObject(js, "rmsd_angstrom", o.search.dedup.rmsd);
        cJSON_AddNumberToObject(js, "energy_tolerance_kcal_per_mol", o.search.dedup.energy_tol);
        cJSON_AddNumberToObject(js, "temperature_kelvin", o.search.temperature);
        cJSON_AddBoolToObject(js, "rank_by_free_energy", o.search.free_energy);
        cJSON_AddNumberToObject(js, "max_tries", o.search.max_tries);
        cJSON_AddNumberToObject(js, "batch", o.search.batch);
        cJSON_AddNumberToObject(js, "quiet_rounds", o.search.quiet_rounds);
        cJSON_AddNumberToObject(js, "unsure_above_kcal_per_mol", o.search.uncertainty_mark);
        cJSON_AddStringToObject(js, "stopping_rule",
                                "stop when quiet_rounds consecutive batches, each started with no "
                                "follow-up of a minimum pending, add no new minimum within the "
                                "window of the lowest energy (after every combination was tried, "
                                "when they are few enough), or after max_tries candidates; a "
                                "molecule with nothing to sample stops after one candidate");
        cJSON_AddStringToObject(doc, "energy_unit", "kcal/mol");
        cJSON_AddStringToObject(doc, "frequency_unit", "cm^-1");
        mols = cJSON_AddArrayToObject(doc, "molecules");
    }

    nd_progress mp;
    nd_progress_start(&mp, "molecules", -1);
    for (int rec = 1;; rec++) {
        int s = nd_reader_next(r, &mol, &err);
        if (s == ND_END)
            break;
        rec = nd_reader_record(r);
        nd_search *srch = NULL;
        double secs = 0;
        if (s == ND_OK)
            s = search_one(&o, model, &mol, rec, &srch, &secs, &err);
        if (s == ND_OK && w)
            s = write_conformers(w, &mol, srch, o.search.free_energy, &err);
        cJSON *jm = NULL;
        if (mols) {
            jm = cJSON_CreateObject();
            cJSON_AddItemToArray(mols, jm);
            cJSON_AddNumberToObject(jm, "record", rec);
            if (s == ND_OK || mol.natoms > 0)
                cJSON_AddItemToObject(jm, "molecule", nd_report_molecule(&mol));
        }
        if (s != ND_OK) {
            failed++;
            last_fail = s;
            if (from_string && s == ND_EINPUT && mol.natoms == 0)
                fprintf(stderr, "nadir %s: '%s' is neither a file nor a SMILES string: %s\n", CMD,
                        o.input, err.msg);
            else
                fprintf(stderr, "nadir %s: %s, record %d: %s\n", CMD, nd_reader_name(r), rec,
                        err.msg);
            if (jm) {
                cJSON_AddStringToObject(jm, "status", "failed");
                cJSON_AddStringToObject(jm, "message", err.msg);
            }
            nd_search_free(srch);
            if (s != ND_EINPUT && s != ND_EDOMAIN && s != ND_ECOMPUTE && s != ND_EEXTERNAL)
                break; /* out of memory, unreadable input: the reader may not go on */
            nd_progress_update(&mp, rec);
            continue;
        }
        done++;
        char where[300];
        snprintf(where, sizeof where, "%s, record %d", nd_reader_name(r), rec);
        int outside = cli_size_note(CMD, model, &mol, where);
        print_table(rec, &mol, srch, o.search.free_energy, o.search.temperature, secs);
        if (jm) {
            cJSON_AddStringToObject(jm, "status", "ok");
            cJSON_AddBoolToObject(jm, "outside_training_sizes", outside);
            cJSON_AddItemToObject(jm, "search", stats_json(nd_search_stats(srch), secs));
            cJSON *jc = cJSON_AddArrayToObject(jm, "conformers");
            for (int k = 0; k < nd_search_count(srch); k++)
                cJSON_AddItemToArray(jc, conformer_json(nd_search_conformer(srch, k), k + 1,
                                                        mol.natoms, mol.z));
        }
        nd_search_free(srch);
        nd_progress_update(&mp, rec);
        fflush(stdout);
    }
    nd_progress_finish(&mp);

    if (w) {
        if (done == 0) {
            nd_writer_abort(w);
        } else if (nd_writer_close(w, &err) != ND_OK) {
            w = NULL;
            rc = cli_error(CMD, &err);
            goto out;
        }
        w = NULL;
    }
    if (doc) {
        cJSON *sum = cJSON_AddObjectToObject(doc, "summary");
        cJSON_AddNumberToObject(sum, "molecules_done", done);
        cJSON_AddNumberToObject(sum, "molecules_failed", failed);
        if (nd_report_write(doc, o.report, &err) != ND_OK) {
            rc = cli_error(CMD, &err);
            goto out;
        }
    }
    if (failed == 0)
        rc = ND_EXIT_OK;
    else if (done > 0)
        rc = ND_EXIT_PARTIAL;
    else
        rc = cli_exit_code(last_fail);
out:
    nd_writer_abort(w);
    nd_reader_close(r);
    nd_molecule_free(&mol);
    nd_model_free(model);
    cJSON_Delete(doc);
    return rc;
}
