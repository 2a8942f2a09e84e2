/* nadir modes: normal-mode analysis of each record under a potential: the
 * finite-difference Hessian, frequencies, the minimum / saddle verdict,
 * optional repair of imaginary modes, ideal-gas thermochemistry, and mode
 * animations as multi-frame XYZ. */
#include "cli/cli.h"

#include <getopt.h>
#include <limits.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

static const char *CMD = "modes";

/* Defaults, explained in the usage text. */
#define DEFAULT_TIMEOUT 600.0  /* s per external program run */
#define DEFAULT_FRAMES 20      /* frames per animated mode (one period) */
#define DEFAULT_AMPLITUDE 0.3  /* angstrom, largest atom displacement in an animation */

enum { ANIM_NONE = 0, ANIM_ALL, ANIM_IMAGINARY, ANIM_ONE };

typedef struct {
    const char *input, *model, *command, *report, *animate_out, *write_out, *frozen_list;
    nd_format format;
    double timeout, temperature, pressure_bar, step, amplitude;
    int symmetry, quasi, repair, relax, json, frames;
    int animate, animate_mode; /* ANIM_*, and the 1-based mode for ANIM_ONE */
} modes_options;

static void usage(FILE *f)
{
    fprintf(f,
            "usage: nadir modes IN [--model FILE | --potential-command CMD] [options]\n"
            "\n"
            "Normal-mode analysis of every record of IN: the Hessian by central finite\n"
            "differences of the potential's gradients, harmonic frequencies (cm^-1,\n"
            "imaginary ones as negative numbers) with reduced masses and force constants,\n"
            "a verdict (minimum, or how many imaginary modes), and ideal-gas rigid-rotor\n"
            "harmonic-oscillator thermochemistry. Translations and rotations are projected\n"
            "out (5 for a linear molecule, else 6). Masses are the standard atomic weights,\n"
            "or the isotope of the record where the file gives one (deuterium, 13C, ...).\n"
            "\n"
            "An imaginary mode above -%g cm^-1 at a structure whose residual gradient is\n"
            "below %g kcal/mol/A (rms) is reported as numerical noise, not as a saddle.\n"
            "Structures should be minima of the same potential; use --relax otherwise.\n"
            "\n"
            "  IN                       .xyz (multi-frame) or .sdf/.sd/.mol with 3D coordinates; '-' stdin\n"
            "  --model FILE             learned potential (ensemble mean); without it and without\n"
            "                           --potential-command, potential/models/default.model is used\n"
            "  --potential-command CMD  an external program as the potential (protocol in\n"
            "                           potential/external.h); --timeout S per run (default %g)\n"
            "  --relax                  minimise each structure first (tight convergence)\n"
            "  --repair                 displace along each imaginary mode both ways, minimise,\n"
            "                           keep the lower, check again (up to %d rounds)\n"
            "  --frozen LIST            keep atoms fixed (1-based, e.g. 1,4-6); the analysis then\n"
            "                           uses the free atoms' partial Hessian, without projection\n"
            "                           or thermochemistry\n"
            "  --step A                 finite-difference displacement, angstrom (default %g)\n"
            "  --temperature K          (default %g)\n"
            "  --pressure BAR           (default 1 bar)\n"
            "  --symmetry N             rotational symmetry number (default: found from the\n"
            "                           coordinates within %g A)\n"
            "  --quasi                  quasi-RRHO entropy for soft modes (Grimme, Chem. Eur. J.\n"
            "                           18, 9955, 2012; w0 = %g cm^-1, alpha = %g)\n"
            "  --json                   print one JSON document instead of the tables\n"
            "  --report FILE            also write the JSON document to FILE\n"
            "  -o, --output FILE        write the final structures (after --relax/--repair),\n"
            "                           with data items modes_verdict and modes_imaginary;\n"
            "                           --write FILE is the same\n"
            "  --animate WHICH          animate modes: all, imaginary, or a mode number\n"
            "  --animate-out FILE       multi-frame .xyz for the animations (required with --animate)\n"
            "  --frames N               frames per mode (default %d)\n"
            "  --amplitude A            largest atom displacement, angstrom (default %g)\n"
            "  --format F               read IN as F (xyz, sdf) whatever its name\n"
            "  --help                   this text\n"
            "\n"
            "Units: energies kcal/mol, entropies and heat capacities cal/(mol K). The\n"
            "thermal corrections (ZPE, H, G) are to be added to the potential energy.\n"
            "\n"
            "examples:\n"
            "  nadir modes relaxed.sdf --model ligands.model\n"
            "  nadir modes ts-guess.xyz --model ligands.model --repair -o fixed.xyz\n"
            "  nadir modes water.xyz --model ligands.model --animate all --animate-out water-modes.xyz\n"
            "  nadir modes frames.xyz --potential-command 'tools/reference-gradient' --json\n"
            "\n"
            "exit: 0 every record analysed, 5 some failed, 3 none could be read or a structure\n"
            "      is unusable (atoms on top of each other), 4 a computation failed, 2 usage\n",
            ND_MODES_NOISE_FREQ, ND_MODES_NOISE_GRAD, DEFAULT_TIMEOUT, ND_REPAIR_ROUNDS,
            ND_HESSIAN_STEP_DEFAULT, ND_THERMO_T_DEFAULT, ND_SYMMETRY_TOL, ND_THERMO_QH_W0,
            ND_THERMO_QH_ALPHA, DEFAULT_FRAMES, DEFAULT_AMPLITUDE);
}

enum {
    O_MODEL = 256, O_COMMAND, O_TIMEOUT, O_RELAX, O_REPAIR, O_FROZEN, O_STEP, O_TEMP, O_PRES,
    O_SYM, O_QUASI, O_JSON, O_REPORT, O_WRITE, O_ANIM, O_ANIM_OUT, O_FRAMES, O_AMPL, O_FORMAT
};

static int positive(const char *opt, const char *arg, double *out)
{
    if (cli_parse_double(arg, out) != 0 || !(*out > 0) || !isfinite(*out))
        return cli_usage(CMD, "%s needs a positive number, got '%s'", opt, arg);
    return 0;
}

static int parse(int argc, char **argv, modes_options *o)
{
    static const struct option longopts[] = {
        {"model", required_argument, NULL, O_MODEL},
        {"potential-command", required_argument, NULL, O_COMMAND},
        {"timeout", required_argument, NULL, O_TIMEOUT},
        {"relax", no_argument, NULL, O_RELAX},
        {"repair", no_argument, NULL, O_REPAIR},
        {"frozen", required_argument, NULL, O_FROZEN},
        {"step", required_argument, NULL, O_STEP},
        {"temperature", required_argument, NULL, O_TEMP},
        {"pressure", required_argument, NULL, O_PRES},
        {"symmetry", required_argument, NULL, O_SYM},
        {"quasi", no_argument, NULL, O_QUASI},
        {"json", no_argument, NULL, O_JSON},
        {"report", required_argument, NULL, O_REPORT},
        {"write", required_argument, NULL, O_WRITE},
        {"output", required_argument, NULL, O_WRITE},
        {"animate", required_argument, NULL, O_ANIM},
        {"animate-out", required_argument, NULL, O_ANIM_OUT},
        {"frames", required_argument, NULL, O_FRAMES},
        {"amplitude", required_argument, NULL, O_AMPL},
        {"format", required_argument, NULL, O_FORMAT},
        {"help", no_argument, NULL, 'h'},
        {NULL, 0, NULL, 0}};
    memset(o, 0, sizeof *o);
    o->timeout = DEFAULT_TIMEOUT;
    o->temperature = ND_THERMO_T_DEFAULT;
    o->pressure_bar = 1.0;
    o->step = ND_HESSIAN_STEP_DEFAULT;
    o->frames = DEFAULT_FRAMES;
    o->amplitude = DEFAULT_AMPLITUDE;
    opterr = 0;
    optind = 1;
    int c, rc;
    while ((c = getopt_long(argc, argv, ":o:h", longopts, NULL)) != -1) {
        switch (c) {
        case O_MODEL: o->model = optarg; break;
        case O_COMMAND: o->command = optarg; break;
        case O_TIMEOUT:
            if ((rc = positive("--timeout", optarg, &o->timeout)))
                return rc;
            break;
        case O_RELAX: o->relax = 1; break;
        case O_REPAIR: o->repair = 1; break;
        case O_FROZEN: o->frozen_list = optarg; break;
        case O_STEP:
            if ((rc = positive("--step", optarg, &o->step)))
                return rc;
            if (o->step > 0.1)
                return cli_usage(CMD, "--step %g is too large (at most 0.1 angstrom)", o->step);
            break;
        case O_TEMP:
            if ((rc = positive("--temperature", optarg, &o->temperature)))
                return rc;
            break;
        case O_PRES:
            if ((rc = positive("--pressure", optarg, &o->pressure_bar)))
                return rc;
            break;
        case O_SYM:
            if (cli_parse_int(optarg, &o->symmetry) != 0 || o->symmetry < 1)
                return cli_usage(CMD, "--symmetry needs a positive whole number, got '%s'", optarg);
            break;
        case O_QUASI: o->quasi = 1; break;
        case O_JSON: o->json = 1; break;
        case O_REPORT: o->report = optarg; break;
        case 'o':
        case O_WRITE: o->write_out = optarg; break;
        case O_ANIM:
            if (strcmp(optarg, "all") == 0)
                o->animate = ANIM_ALL;
            else if (strcmp(optarg, "imaginary") == 0)
                o->animate = ANIM_IMAGINARY;
            else if (cli_parse_int(optarg, &o->animate_mode) == 0 && o->animate_mode >= 1)
                o->animate = ANIM_ONE;
            else
                return cli_usage(CMD, "--animate needs all, imaginary or a mode number, got '%s'", optarg);
            break;
        case O_ANIM_OUT: o->animate_out = optarg; break;
        case O_FRAMES:
            if (cli_parse_int(optarg, &o->frames) != 0 || o->frames < 2 || o->frames > 1000)
                return cli_usage(CMD, "--frames needs a whole number from 2 to 1000, got '%s'", optarg);
            break;
        case O_AMPL:
            if ((rc = positive("--amplitude", optarg, &o->amplitude)))
                return rc;
            break;
        case O_FORMAT:
            o->format = nd_format_from_name(optarg);
            if (o->format == ND_FORMAT_AUTO || o->format == ND_FORMAT_SMILES)
                return cli_usage(CMD, "unknown format '%s'; expected xyz or sdf", optarg);
            break;
        case 'h': usage(stdout); return -1;
        case ':': return cli_usage(CMD, "option %s needs a value", argv[optind - 1]);
        default: return cli_usage(CMD, "unknown option '%s'", argv[optind - 1]);
        }
    }
    if (optind >= argc)
        return cli_usage(CMD, "no input file given");
    if (argc - optind > 1)
        return cli_usage(CMD, "one input file expected, got %d", argc - optind);
    o->input = argv[optind];
    if (o->model && o->command)
        return cli_usage(CMD, "give one potential: --model FILE or --potential-command CMD, not both");
    if (o->animate && !o->animate_out)
        return cli_usage(CMD, "--animate needs --animate-out FILE");
    if (!o->animate && o->animate_out)
        return cli_usage(CMD, "--animate-out needs --animate WHICH");
    return 0;
}

/* Frozen-atom list "1,4-6" (1-based) into a mask of n atoms. Returns 0, or
 * -1 with a message in err. */
static int parse_frozen(const char *list, int n, int *mask, nd_error *err)
{
    memset(mask, 0, sizeof(int) * (size_t)n);
    const char *p = list;
    while (*p) {
        char *end;
        long a = strtol(p, &end, 10), b = a;
        if (end == p)
            return nd_fail(err, ND_EINPUT, "--frozen '%s': expected atom numbers like 1,4-6", list), -1;
        p = end;
        if (*p == '-') {
            const char *q = p + 1;
            b = strtol(q, &end, 10);
            if (end == q)
                return nd_fail(err, ND_EINPUT, "--frozen '%s': a range needs two numbers", list), -1;
            p = end;
        }
        if (b < a)
            return nd_fail(err, ND_EINPUT, "--frozen '%s': range %ld-%ld runs backwards", list, a,
                           b), -1;
        if (a < 1 || b > n)
            return nd_fail(err, ND_EINPUT, "--frozen '%s': atom %ld is outside 1..%d (the record's atoms)",
                           list, a < 1 ? a : b, n), -1;
        for (long i = a; i <= b; i++)
            mask[i - 1] = 1;
        if (*p == ',')
            p++;
        else if (*p)
            return nd_fail(err, ND_EINPUT, "--frozen '%s': unexpected '%c'", list, *p), -1;
    }
    return 0;
}

/* The potential for one record: a model bound to its atoms, or an external program. */
typedef struct {
    nd_potential *pot;
    nd_external *ext;
    nd_energy e;
} bound;

static int bind(const modes_options *o, const nd_model *model, const nd_molecule *mol, bound *b,
                nd_error *err)
{
    memset(b, 0, sizeof *b);
    int s;
    if (model) {
        if ((s = nd_model_check(model, mol, err)) != ND_OK)
            return s;
        if ((s = nd_potential_new(&b->pot, model, mol->natoms, mol->z, ND_POTENTIAL_MEAN, err)) != ND_OK)
            return s;
        b->e = nd_potential_energy(b->pot);
    } else {
        s = nd_external_new(&b->ext, o->command, mol->natoms, mol->z, mol->charge, mol->multiplicity,
                            o->timeout, err);
        if (s != ND_OK)
            return s;
        b->e = nd_external_energy(b->ext);
    }
    return ND_OK;
}

static void unbind(bound *b)
{
    nd_potential_free(b->pot);
    nd_external_free(b->ext);
    memset(b, 0, sizeof *b);
}

/* An external potential keeps its own message; bring it into err. */
static void external_message(const bound *b, nd_error *err)
{
    if (b->ext) {
        nd_error e2;
        nd_external_last_error(b->ext, &e2);
        if (e2.code != ND_OK)
            *err = e2;
    }
}

/* Result of one record. */
typedef struct {
    double energy;
    nd_modes modes;
    nd_check check;
    nd_thermo thermo;
    int have_thermo;
    nd_repair_result repair;
    nd_minimize_result relax;
} record_result;

/* Relax (optionally), analyse or repair, thermochemistry. mol->xyz is updated. */
static int analyse(const modes_options *o, const bound *b, nd_molecule *mol, const int *frozen,
                   record_result *r, nd_error *err)
{
    int n = mol->natoms, s;
    nd_hessian_opts hopt = {o->step, 0};
    if (o->relax) {
        nd_minimize_options mo;
        nd_minimize_options_default(&mo);
        nd_converge_preset_modes(&mo.stop);
        nd_restraints *rs = NULL;
        nd_energy e = b->e;
        if (frozen) {
            if ((s = nd_restraints_new(&rs, &b->e, n, err)) != ND_OK)
                return s;
            for (int i = 0; i < n; i++)
                if (frozen[i])
                    nd_restraints_freeze(rs, i, NULL);
            e = nd_restraints_energy(rs);
        }
        s = nd_minimize(NULL, &e, n, mol->xyz, &mo, &r->relax, err);
        nd_restraints_free(rs);
        if (s != ND_OK && s != ND_CONTINUE)
            return s;
    }
    if (o->repair) {
        nd_repair_opts ro = {0};
        ro.hessian = &hopt;
        s = nd_repair_run(&b->e, mol, frozen, &ro, &r->modes, &r->check, &r->repair, err);
    } else {
        s = nd_modes_analyse(&b->e, mol, frozen, &hopt, NULL, NULL, &r->modes, &r->check, NULL, err);
    }
    if (s != ND_OK)
        return s;
    if ((s = b->e.fn(b->e.ctx, n, mol->xyz, &r->energy, NULL)) != ND_OK)
        return nd_fail(err, s, "the potential failed at the final structure");
    if (!frozen) {
        double *mass = malloc(sizeof(double) * (size_t)n);
        if (!mass)
            return nd_fail(err, ND_ENOMEM, "out of memory");
        s = nd_modes_masses(mol, mass, err);
        nd_thermo_opts to = {0};
        to.temperature = o->temperature;
        to.pressure = o->pressure_bar * 1e5;
        to.symmetry = o->symmetry;
        to.multiplicity = mol->multiplicity;
        to.quasi = o->quasi;
        if (s == ND_OK)
            s = nd_thermo_compute(n, mol->z, mass, mol->xyz, r->modes.linear, r->modes.freq,
                                  r->modes.nmodes, &to, &r->thermo, err);
        free(mass);
        if (s != ND_OK)
            return s;
        r->have_thermo = 1;
    }
    return ND_OK;
}

/* Residual gradient (rms, kcal/mol/A) above which a structure is not taken
 * for a stationary point: ten times the ranking preset's rms force, above
 * what any relaxation that converged can leave (common practice, no source). */
#define NOT_STATIONARY_RMS 0.5

static int not_stationary(const nd_check *c)
{
    return c->grad_rms > NOT_STATIONARY_RMS;
}

static const char *verdict_text(const nd_check *c, char *buf, size_t size)
{
    if (not_stationary(c))
        snprintf(buf, size, "not a stationary point (%d imaginary mode%s); frequencies and "
                 "thermochemistry are not meaningful here: use --relax",
                 c->nimag, c->nimag == 1 ? "" : "s");
    else if (c->verdict == ND_VERDICT_MINIMUM)
        snprintf(buf, size, "minimum");
    else
        snprintf(buf, size, "saddle point, %d imaginary mode%s", c->nimag, c->nimag == 1 ? "" : "s");
    return buf;
}

static void print_record(const modes_options *o, int record, const nd_molecule *mol,
                         const record_result *r)
{
    char formula[128], vb[160];
    nd_molecule_formula(mol, formula, (int)sizeof formula);
    printf("record %d  %s  %s  %d atoms\n", record, mol->title && mol->title[0] ? mol->title : "-",
           formula, mol->natoms);
    if (o->relax)
        printf("  relaxed             %d step%s, %s\n", r->relax.steps, r->relax.steps == 1 ? "" : "s",
               r->relax.converged ? "converged" : "NOT converged");
    if (o->repair) {
        if (r->repair.rounds == 0)
            printf("  repair              not needed\n");
        else
            printf("  repair              %d imaginary -> %d after %d round%s (%d minimisations), "
                   "energy %.4f -> %.4f kcal/mol\n",
                   r->repair.nimag_start, r->repair.nimag_end, r->repair.rounds,
                   r->repair.rounds == 1 ? "" : "s", r->repair.trials, r->repair.energy_start,
                   r->repair.energy_end);
    }
    printf("  energy              %.6f kcal/mol\n", r->energy);
    printf("  residual gradient   %.2e kcal/mol/A (rms)\n", r->check.grad_rms);
    printf("  verdict             %s", verdict_text(&r->check, vb, sizeof vb));
    if (r->check.nnoise)
        printf(" (%d small imaginary mode%s taken as numerical noise)", r->check.nnoise,
               r->check.nnoise == 1 ? "" : "s");
    printf("\n");
    const nd_modes *m = &r->modes;
    printf("  %d vibration%s (%d atom%s analysed, %d rigid motions removed%s)\n", m->nmodes,
           m->nmodes == 1 ? "" : "s", m->natoms, m->natoms == 1 ? "" : "s", m->nexternal,
           m->linear ? ", linear" : "");
    printf("  %5s  %12s  %14s  %12s  %14s\n", "mode", "cm^-1", "red. mass amu", "k mdyn/A",
           "k kcal/mol/A2");
    for (int k = 0; k < m->nmodes; k++) {
        int imag = nd_modes_is_imaginary(m->freq[k], r->check.grad_rms, NULL);
        printf("  %5d  %12.2f  %14.4f  %12.4f  %14.3f%s\n", k + 1, m->freq[k], m->redmass[k],
               m->k_mdyn[k], m->k_kcal[k], imag ? "  imaginary" : m->freq[k] < 0 ? "  noise" : "");
    }
    if (r->have_thermo) {
        const nd_thermo *t = &r->thermo;
        printf("  thermochemistry at %.2f K, %.5g bar: ideal gas, rigid rotor, harmonic%s\n",
               t->temperature, t->pressure / 1e5, o->quasi ? " (quasi-RRHO entropy)" : "");
        printf("    symmetry number       %d (%s)%s\n", t->sigma, t->sigma_detected ? "found" : "given",
               t->linear ? ", linear" : "");
        if (t->nimag_skipped)
            printf("    left out              %d imaginary frequenc%s\n", t->nimag_skipped,
                   t->nimag_skipped == 1 ? "y" : "ies");
        printf("    zero-point energy     %12.4f kcal/mol\n", t->zpe);
        printf("    thermal energy E      %12.4f kcal/mol (with the ZPE)\n", t->e_total);
        printf("    enthalpy H            %12.4f kcal/mol (with the ZPE)\n", t->h_total);
        printf("    entropy S             %12.4f cal/(mol K)   trans %.3f  rot %.3f  vib %.3f  elec %.3f\n",
               t->s_total, t->s_trans, t->s_rot, t->s_vib, t->s_elec);
        printf("    heat capacity Cv      %12.4f cal/(mol K)\n", t->cv_total);
        printf("    free energy G = H-TS  %12.4f kcal/mol\n", t->g_total);
        printf("    energy + ZPE          %12.4f kcal/mol\n", r->energy + t->zpe);
        printf("    energy + G            %12.4f kcal/mol\n", r->energy + t->g_total);
    }
    printf("\n");
}

static cJSON *record_json(const modes_options *o, int record, const nd_molecule *mol,
                          const record_result *r)
{
    cJSON *j = cJSON_CreateObject();
    if (!j)
        return NULL;
    cJSON_AddNumberToObject(j, "record", record);
    cJSON *mj = nd_report_molecule(mol);
    if (mj)
        cJSON_AddItemToObject(j, "molecule", mj);
    cJSON_AddNumberToObject(j, "energy", r->energy);
    cJSON_AddNumberToObject(j, "gradient_rms", r->check.grad_rms);
    cJSON_AddStringToObject(j, "verdict", r->check.verdict == ND_VERDICT_MINIMUM ? "minimum" : "saddle");
    cJSON_AddBoolToObject(j, "stationary_point", !not_stationary(&r->check));
    cJSON_AddNumberToObject(j, "imaginary", r->check.nimag);
    cJSON_AddNumberToObject(j, "noise", r->check.nnoise);
    cJSON_AddBoolToObject(j, "linear", r->modes.linear);
    cJSON_AddNumberToObject(j, "rigid_motions_removed", r->modes.nexternal);
    const nd_modes *m = &r->modes;
    nd_report_add_numbers(j, "wavenumbers", m->freq, m->nmodes, NULL);
    nd_report_add_numbers(j, "reduced_masses", m->redmass, m->nmodes, NULL);
    nd_report_add_numbers(j, "force_constants_mdyn_per_angstrom", m->k_mdyn, m->nmodes, NULL);
    nd_report_add_numbers(j, "force_constants_kcal_per_mol_angstrom2", m->k_kcal, m->nmodes, NULL);
    if (o->relax) {
        cJSON *rj = cJSON_AddObjectToObject(j, "relax");
        if (rj) {
            cJSON_AddBoolToObject(rj, "converged", r->relax.converged);
            cJSON_AddNumberToObject(rj, "steps", r->relax.steps);
        }
    }
    if (o->repair) {
        cJSON *rj = cJSON_AddObjectToObject(j, "repair");
        if (rj) {
            cJSON_AddNumberToObject(rj, "rounds", r->repair.rounds);
            cJSON_AddNumberToObject(rj, "imaginary_before", r->repair.nimag_start);
            cJSON_AddNumberToObject(rj, "imaginary_after", r->repair.nimag_end);
            cJSON_AddNumberToObject(rj, "minimisations", r->repair.trials);
            cJSON_AddNumberToObject(rj, "energy_before", r->repair.energy_start);
            cJSON_AddNumberToObject(rj, "energy_after", r->repair.energy_end);
            cJSON_AddBoolToObject(rj, "repaired", r->repair.repaired);
        }
    }
    if (r->have_thermo) {
        const nd_thermo *t = &r->thermo;
        cJSON *tj = cJSON_AddObjectToObject(j, "thermochemistry");
        if (tj) {
            cJSON_AddNumberToObject(tj, "temperature", t->temperature);
            cJSON_AddNumberToObject(tj, "pressure_bar", t->pressure / 1e5);
            cJSON_AddNumberToObject(tj, "symmetry_number", t->sigma);
            cJSON_AddBoolToObject(tj, "symmetry_found", t->sigma_detected);
            cJSON_AddBoolToObject(tj, "quasi_rrho", o->quasi);
            cJSON_AddNumberToObject(tj, "imaginary_left_out", t->nimag_skipped);
            cJSON_AddNumberToObject(tj, "zero_point_energy", t->zpe);
            cJSON_AddNumberToObject(tj, "thermal_energy", t->e_total);
            cJSON_AddNumberToObject(tj, "enthalpy", t->h_total);
            cJSON_AddNumberToObject(tj, "entropy", t->s_total);
            cJSON_AddNumberToObject(tj, "entropy_translation", t->s_trans);
            cJSON_AddNumberToObject(tj, "entropy_rotation", t->s_rot);
            cJSON_AddNumberToObject(tj, "entropy_vibration", t->s_vib);
            cJSON_AddNumberToObject(tj, "entropy_electronic", t->s_elec);
            cJSON_AddNumberToObject(tj, "heat_capacity_cv", t->cv_total);
            cJSON_AddNumberToObject(tj, "free_energy", t->g_total);
            cJSON_AddNumberToObject(tj, "energy_plus_free_energy", r->energy + t->g_total);
            cJSON_AddStringToObject(tj, "units", "kcal/mol; entropy and heat capacity cal/(mol K)");
        }
    }
    return j;
}

/* Appends the frames of the chosen modes of one record to w. */
static int animate(const modes_options *o, nd_writer *w, int record, const nd_molecule *mol,
                   const record_result *r, nd_error *err)
{
    nd_molecule frame;
    nd_molecule_init(&frame);
    int s = nd_molecule_copy(&frame, mol, err);
    for (int k = 0; k < r->modes.nmodes && s == ND_OK; k++) {
        if (o->animate == ANIM_ONE && k != o->animate_mode - 1)
            continue;
        if (o->animate == ANIM_IMAGINARY && !nd_modes_is_imaginary(r->modes.freq[k], r->check.grad_rms, NULL))
            continue;
        for (int f = 0; f < o->frames && s == ND_OK; f++) {
            char title[160];
            snprintf(title, sizeof title, "record %d mode %d %.2f cm^-1 frame %d/%d", record, k + 1,
                     r->modes.freq[k], f + 1, o->frames);
            s = nd_modes_frame(&r->modes, k, mol->natoms, mol->xyz, o->amplitude, f, o->frames,
                               frame.xyz, err);
            if (s == ND_OK)
                s = nd_molecule_set_title(&frame, title, err);
            if (s == ND_OK)
                s = nd_writer_write(w, &frame, err);
        }
    }
    if (s == ND_OK && o->animate == ANIM_ONE && o->animate_mode > r->modes.nmodes)
        s = nd_fail(err, ND_EINPUT, "--animate %d: record %d has %d modes", o->animate_mode, record,
                    r->modes.nmodes);
    nd_molecule_free(&frame);
    return s;
}

int cmd_modes(int argc, char **argv)
{
    modes_options o;
    int rc = parse(argc, argv, &o);
    if (rc != 0)
        return rc < 0 ? ND_EXIT_OK : rc;
    if ((rc = cli_check_output(CMD, "--report", o.report)) != 0)
        return rc;
    if ((o.write_out && strcmp(o.write_out, "-") == 0) ||
        (o.animate_out && strcmp(o.animate_out, "-") == 0))
        return cli_usage(CMD, "%s -: standard output carries the tables (or --json); give a file "
                              "name",
                         o.write_out && strcmp(o.write_out, "-") == 0 ? "-o" : "--animate-out");

    char mpath[PATH_MAX + 64];
    if (!o.command && (rc = cli_model_path(CMD, o.model, 1, mpath, sizeof mpath)) != 0)
        return rc;
    nd_error err;
    nd_error_clear(&err);
    nd_model *model = NULL;
    nd_reader *rd = NULL;
    nd_writer *anim = NULL, *wout = NULL;
    nd_molecule mol;
    nd_molecule_init(&mol);
    cJSON *doc = NULL, *records = NULL, *failures = NULL;
    int *frozen = NULL;
    int done = 0, failed = 0, last_fail = ND_OK;
    rc = ND_EXIT_OK;

    if (!o.command && nd_model_load(mpath, &model, &err) != ND_OK) {
        rc = cli_error(CMD, &err);
        goto out;
    }
    if (model)
        cli_model_notice(CMD, mpath, model);
    if ((rc = cli_open_structures(CMD, o.input, o.format, &rd)) != 0)
        goto out;
    if (nd_reader_format(rd) == ND_FORMAT_SMILES) {
        rc = cli_fail(CMD, ND_EINPUT, "%s: SMILES has no 3D coordinates; give .xyz or .sdf", o.input);
        goto out;
    }
    if (o.animate_out && nd_writer_open(&anim, o.animate_out, ND_FORMAT_XYZ, &err) != ND_OK) {
        rc = cli_error(CMD, &err);
        goto out;
    }
    if (o.write_out && nd_writer_open(&wout, o.write_out, ND_FORMAT_AUTO, &err) != ND_OK) {
        rc = cli_error(CMD, &err);
        goto out;
    }
    if (o.json || o.report) {
        doc = cJSON_CreateObject();
        records = doc ? cJSON_AddArrayToObject(doc, "records") : NULL;
        failures = doc ? cJSON_AddArrayToObject(doc, "failures") : NULL;
        if (!records || !failures) {
            rc = cli_fail(CMD, ND_ENOMEM, "out of memory");
            goto out;
        }
        cJSON_AddStringToObject(doc, "input", o.input);
        cJSON_AddStringToObject(doc, "energy_unit", "kcal/mol");
        cJSON_AddStringToObject(doc, "gradient_unit", "kcal/mol/angstrom");
        cJSON_AddStringToObject(doc, "wavenumber_unit", "cm^-1");
        cJSON_AddStringToObject(doc, "reduced_mass_unit", "amu");
    }

    for (;;) {
        int s = nd_reader_next(rd, &mol, &err);
        if (s == ND_END)
            break;
        int record = nd_reader_record(rd);
        record_result r;
        memset(&r, 0, sizeof r);
        bound b;
        memset(&b, 0, sizeof b);
        int read_failed = s != ND_OK; /* the reader's message names file and record */
        if (s == ND_OK && (mol.natoms == 0 || mol.dimension != 3))
            s = nd_fail(&err, ND_EINPUT, "needs 3D coordinates (%s)",
                        mol.natoms == 0 ? "no atoms"
                        : mol.dimension == 2 ? "the record is a 2D drawing"
                                             : "the record has none");
        if (s == ND_OK && o.frozen_list) {
            free(frozen);
            frozen = malloc(sizeof(int) * (size_t)mol.natoms);
            if (!frozen)
                s = nd_fail(&err, ND_ENOMEM, "out of memory");
            else if (parse_frozen(o.frozen_list, mol.natoms, frozen, &err) != 0)
                s = ND_EINPUT;
        }
        if (s == ND_OK)
            s = bind(&o, model, &mol, &b, &err);
        if (s == ND_OK) {
            s = analyse(&o, &b, &mol, o.frozen_list ? frozen : NULL, &r, &err);
            if (s != ND_OK)
                external_message(&b, &err);
        }
        if (s == ND_OK) {
            if (not_stationary(&r.check))
                fprintf(stderr,
                        "nadir %s: %s, record %d: residual gradient %.3g kcal/mol/A (rms) is above "
                        "%g: not a stationary point of this potential, so its frequencies and "
                        "thermochemistry mean little; use --relax\n",
                        CMD, nd_reader_name(rd), record, r.check.grad_rms, NOT_STATIONARY_RMS);
            char where[300];
            snprintf(where, sizeof where, "%s, record %d", nd_reader_name(rd), record);
            int outside = cli_size_note(CMD, model, &mol, where);
            if (!o.json)
                print_record(&o, record, &mol, &r);
            if (records) {
                cJSON *j = record_json(&o, record, &mol, &r);
                if (j) {
                    cJSON_AddBoolToObject(j, "outside_training_sizes", outside);
                    cJSON_AddItemToArray(records, j);
                }
            }
            if (anim)
                s = animate(&o, anim, record, &mol, &r, &err);
            if (s == ND_OK && wout) {
                char buf[32];
                nd_molecule_set_data(&mol, "modes_verdict",
                                     not_stationary(&r.check)                 ? "not stationary"
                                     : r.check.verdict == ND_VERDICT_MINIMUM ? "minimum"
                                                                              : "saddle",
                                     NULL);
                snprintf(buf, sizeof buf, "%d", r.check.nimag);
                nd_molecule_set_data(&mol, "modes_imaginary", buf, NULL);
                s = nd_writer_write(wout, &mol, &err);
            }
        }
        unbind(&b);
        nd_modes_free(&r.modes);
        if (s == ND_OK) {
            done++;
            continue;
        }
        if (s == ND_ENOMEM || s == ND_EIO) {
            rc = cli_error(CMD, &err);
            goto out;
        }
        failed++;
        char close[96] = "";
        /* atoms on top of each other: the input is at fault, not the
         * computation (exit 3, as in energy and optimize) */
        if (!read_failed && (s == ND_ECOMPUTE || s == ND_EEXTERNAL) &&
            cli_close_contact(&mol, close, sizeof close))
            s = ND_EINPUT;
        last_fail = s;
        if (read_failed)
            fprintf(stderr, "nadir %s: %s\n", CMD, err.msg[0] ? err.msg : nd_status_name(s));
        else {
            fprintf(stderr, "nadir %s: %s, record %d: %s%s\n", CMD, nd_reader_name(rd), record,
                    err.msg[0] ? err.msg : nd_status_name(s), close);
        }
        if (failures) {
            cJSON *fj = cJSON_CreateObject();
            if (fj) {
                cJSON_AddNumberToObject(fj, "record", record);
                cJSON_AddStringToObject(fj, "error", err.msg);
                cJSON_AddItemToArray(failures, fj);
            }
        }
        if (s != ND_EINPUT && s != ND_EDOMAIN && s != ND_ECOMPUTE && s != ND_EEXTERNAL) {
            rc = cli_exit_code(s);
            goto out;
        }
    }

    if ((rc = cli_finish(CMD, doc, o.json, o.report, &anim, &wout)) != 0)
        goto out;
    if (failed == 0 && done == 0)
        rc = cli_fail(CMD, ND_EINPUT, "%s: no records", o.input);
    else if (failed > 0 && done == 0)
        rc = last_fail == ND_EINPUT || last_fail == ND_EDOMAIN ? ND_EXIT_INPUT : ND_EXIT_COMPUTE;
    else if (failed > 0)
        rc = ND_EXIT_PARTIAL;
out:
    nd_writer_abort(anim);
    nd_writer_abort(wout);
    nd_reader_close(rd);
    nd_model_free(model);
    nd_molecule_free(&mol);
    cJSON_Delete(doc);
    free(frozen);
    return rc;
}
