/* nadir optimize: relaxes every record of a molecule file to a local minimum
 * of a potential (L-BFGS with the Lindh model-Hessian preconditioner, or
 * FIRE), with frozen atoms and relaxed torsion scans, and reports for each
 * record whether and why it converged. */
#include "cli/cli.h"

#include <getopt.h>
#include <limits.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#ifdef _OPENMP
#include <omp.h>
#endif

static const char *CMD = "optimize";

/* Defaults, explained in the usage text. */
#define DEFAULT_TIMEOUT 600.0    /* s per external program run */
#define SCAN_FORCE_CONSTANT 2000.0 /* kcal/mol/rad^2: holds a torsion within ~0.5 degree
                                      against torques of ~15 kcal/mol/rad (common practice, no source) */
#define CHUNK 64                 /* records read, optimised in parallel, then written in order */

typedef struct {
    const char *input, *output, *model, *command, *report, *trajectory, *frozen_list;
    const char *scan_list;
    nd_format format;
    const nd_minimizer_type *method;
    int modes_preset, no_precond, json;
    double max_force, timeout;
    int max_steps;
    double scan_from, scan_to, scan_step;
} opt_options;

static void usage(FILE *f)
{
    fprintf(f,
            "usage: nadir optimize IN [-o OUT] [--model FILE | --potential-command CMD] [options]\n"
            "\n"
            "Relaxes every record of IN to a local minimum of the potential and reports, per\n"
            "record, the steps and force calls taken, the final energy, the largest atomic\n"
            "force, and whether the run converged and which test stopped it. A record that\n"
            "reaches its step limit, or whose energy cannot be lowered further, is reported\n"
            "as not converged (its last structure is still written, marked so). Records are\n"
            "relaxed in parallel (OMP_NUM_THREADS threads); results do not depend on it.\n"
            "\n"
            "  IN                       .xyz (multi-frame) or .sdf/.sd/.mol with 3D coordinates; '-' stdin\n"
            "  -o, --output FILE        write the relaxed structures (.xyz or .sdf); SD records get\n"
            "                           the data items optimize_energy (kcal/mol), optimize_max_force\n"
            "                           (kcal/mol/A) and optimize_status (XYZ has no place for them:\n"
            "                           use --report)\n"
            "  --model FILE             learned potential (ensemble mean); without it and without\n"
            "                           --potential-command, potential/models/default.model is used\n"
            "  --potential-command CMD  an external program as the potential (protocol in\n"
            "                           potential/external.h); --timeout S per run (default %g)\n"
            "  --method NAME            lbfgs (default) or fire\n"
            "  --convergence NAME       ranking (default: largest force 0.1, RMS force 0.05\n"
            "                           kcal/mol/A, or energy change 1e-6 kcal/mol with forces\n"
            "                           below 0.5; 2000 steps) or modes (tighter, for a normal-\n"
            "                           mode analysis next: 0.01, 0.005, 1e-8 below 0.05; 5000)\n"
            "  --max-force F            largest-force tolerance, kcal/mol/A (RMS: half of it)\n"
            "  --max-steps N            step limit\n"
            "  --no-preconditioner      plain L-BFGS, without the model Hessian (Lindh et al.,\n"
            "                           Chem. Phys. Lett. 241, 423, 1995) that saves force calls\n"
            "  --frozen LIST            keep atoms fixed (1-based, e.g. 1,4-6)\n"
            "  --scan I,J,K,L           relaxed torsion scan about atoms J-K: hold the torsion\n"
            "                           I-J-K-L at each angle of --scan-range (harmonic restraint,\n"
            "                           %g kcal/mol/rad^2), relax everything else, starting each\n"
            "                           angle from the previous structure with the smaller side\n"
            "                           of J-K turned rigidly to it (not for a ring bond); every\n"
            "                           angle is one output record, the energy profile goes in\n"
            "                           the report\n"
            "  --scan-range A,B,STEP    angles of the scan in degrees (default -180,180,15)\n"
            "  --report FILE            write the JSON report to FILE\n"
            "  --json                   print the JSON report instead of the table\n"
            "  --trajectory FILE        write every accepted step as a frame (.xyz or .sdf)\n"
            "  --format F               read IN as F (xyz, sdf) whatever its name\n"
            "  --help                   this text\n"
            "\n"
            "examples:\n"
            "  nadir optimize candidates.sdf -o relaxed.sdf --model ligands.model\n"
            "  nadir optimize ligand.xyz --model ligands.model --convergence modes -o tight.xyz\n"
            "  nadir optimize butane.sdf --model ligands.model --scan 1,2,3,4 --scan-range 0,180,30 \\\n"
            "      --report scan.json -o scan.sdf\n"
            "\n"
            "exit: 0 every record converged, 5 some did not or failed (each named on stderr),\n"
            "      4 none converged, 3 no record could be read, the potential refused them, or\n"
            "      a structure is unusable (atoms on top of each other),\n"
            "      2 usage\n",
            DEFAULT_TIMEOUT, SCAN_FORCE_CONSTANT);
}

enum {
    O_MODEL = 256, O_COMMAND, O_TIMEOUT, O_METHOD, O_CONV, O_MAXF, O_MAXS, O_NOPC, O_FROZEN,
    O_SCAN, O_SCANR, O_REPORT, O_JSON, O_TRAJ, O_FORMAT
};

static int parse(int argc, char **argv, opt_options *o)
{
    static const struct option longopts[] = {
        {"output", required_argument, NULL, 'o'},
        {"model", required_argument, NULL, O_MODEL},
        {"potential-command", required_argument, NULL, O_COMMAND},
        {"timeout", required_argument, NULL, O_TIMEOUT},
        {"method", required_argument, NULL, O_METHOD},
        {"convergence", required_argument, NULL, O_CONV},
        {"max-force", required_argument, NULL, O_MAXF},
        {"max-steps", required_argument, NULL, O_MAXS},
        {"no-preconditioner", no_argument, NULL, O_NOPC},
        {"frozen", required_argument, NULL, O_FROZEN},
        {"scan", required_argument, NULL, O_SCAN},
        {"scan-range", required_argument, NULL, O_SCANR},
        {"report", required_argument, NULL, O_REPORT},
        {"json", no_argument, NULL, O_JSON},
        {"trajectory", required_argument, NULL, O_TRAJ},
        {"format", required_argument, NULL, O_FORMAT},
        {"help", no_argument, NULL, 'h'},
        {NULL, 0, NULL, 0}};
    memset(o, 0, sizeof *o);
    o->method = &nd_minimizer_lbfgs;
    o->timeout = DEFAULT_TIMEOUT;
    o->scan_from = -180;
    o->scan_to = 180;
    o->scan_step = 15;
    opterr = 0;
    optind = 1;
    int c;
    while ((c = getopt_long(argc, argv, ":ho:", longopts, NULL)) != -1) {
        switch (c) {
        case 'o': o->output = optarg; break;
        case O_MODEL: o->model = optarg; break;
        case O_COMMAND: o->command = optarg; break;
        case O_TIMEOUT:
            if (cli_parse_double(optarg, &o->timeout) || !(o->timeout > 0) || !isfinite(o->timeout))
                return cli_usage(CMD, "--timeout needs a positive number of seconds, got '%s'", optarg);
            break;
        case O_METHOD:
            o->method = nd_minimizer_find(optarg);
            if (!o->method)
                return cli_usage(CMD, "unknown method '%s'; expected lbfgs or fire", optarg);
            break;
        case O_CONV:
            if (strcmp(optarg, "ranking") == 0)
                o->modes_preset = 0;
            else if (strcmp(optarg, "modes") == 0)
                o->modes_preset = 1;
            else
                return cli_usage(CMD, "unknown convergence preset '%s'; expected ranking or modes", optarg);
            break;
        case O_MAXF:
            if (cli_parse_double(optarg, &o->max_force) || !(o->max_force > 0) || !isfinite(o->max_force))
                return cli_usage(CMD, "--max-force needs a positive number, got '%s'", optarg);
            break;
        case O_MAXS:
            if (cli_parse_int(optarg, &o->max_steps) || o->max_steps < 1)
                return cli_usage(CMD, "--max-steps needs a positive integer, got '%s'", optarg);
            break;
        case O_NOPC: o->no_precond = 1; break;
        case O_FROZEN: o->frozen_list = optarg; break;
        case O_SCAN: o->scan_list = optarg; break;
        case O_SCANR: {
            double v[3];
            char extra;
            if (sscanf(optarg, "%lf,%lf,%lf%c", &v[0], &v[1], &v[2], &extra) != 3 || !isfinite(v[0]) ||
                !isfinite(v[1]) || !(v[2] > 0) || !isfinite(v[2]) || v[1] < v[0] || (v[1] - v[0]) / v[2] > 3600)
                return cli_usage(CMD, "--scan-range needs FROM,TO,STEP in degrees with FROM <= TO and "
                                      "STEP > 0 (at most 3600 angles), got '%s'", optarg);
            o->scan_from = v[0];
            o->scan_to = v[1];
            o->scan_step = v[2];
            break;
        }
        case O_REPORT: o->report = optarg; break;
        case O_JSON: o->json = 1; break;
        case O_TRAJ: o->trajectory = optarg; break;
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
    if (o->scan_list) {
        int a[4];
        char extra;
        if (sscanf(o->scan_list, "%d,%d,%d,%d%c", &a[0], &a[1], &a[2], &a[3], &extra) != 4)
            return cli_usage(CMD, "--scan needs four atom numbers I,J,K,L, got '%s'", o->scan_list);
    }
    return 0;
}

/* Atom list "1,4-6" (1-based) into flags of n atoms. ND_OK or ND_EINPUT. */
static int parse_frozen(const char *list, int n, unsigned char *flags, nd_error *err)
{
    memset(flags, 0, (size_t)n);
    const char *p = list;
    while (*p) {
        char *end;
        long a = strtol(p, &end, 10), b = a;
        if (end == p)
            return nd_fail(err, ND_EINPUT, "--frozen '%s': expected atom numbers like 1,4-6", list);
        p = end;
        if (*p == '-') {
            const char *q = p + 1;
            b = strtol(q, &end, 10);
            if (end == q)
                return nd_fail(err, ND_EINPUT, "--frozen '%s': a range needs two numbers", list);
            p = end;
        }
        if (b < a)
            return nd_fail(err, ND_EINPUT, "--frozen '%s': range %ld-%ld runs backwards", list, a,
                           b);
        if (a < 1 || b > n)
            return nd_fail(err, ND_EINPUT, "--frozen '%s': atom %ld is outside 1..%d (the record's atoms)",
                           list, a < 1 ? a : b, n);
        for (long i = a; i <= b; i++)
            flags[i - 1] = 1;
        if (*p == ',')
            p++;
        else if (*p)
            return nd_fail(err, ND_EINPUT, "--frozen '%s': unexpected '%c'", list, *p);
    }
    return ND_OK;
}

/* One relaxation (a record, or one angle of a scan). */
typedef struct {
    int status;         /* ND_OK, ND_CONTINUE (not converged) or an error */
    nd_minimize_result r;
    double initial_energy;
    double energy;      /* of the potential alone (restraint energy removed) */
    double target, torsion; /* scans: degrees */
} relax_result;

/* Everything one record produced. Arrays malloc'd; freed by record_free. */
typedef struct {
    nd_molecule mol;     /* input, then the relaxed structure (last scan angle) */
    int read_status;     /* ND_OK, or the reader's error */
    int status;          /* ND_OK, ND_CONTINUE or an error of the run */
    nd_error err;
    int record;          /* 1-based record number */
    int nfrozen;
    int npoints;         /* 1, or the scan angles */
    relax_result *points;
    double *point_xyz;   /* scans: npoints * 3n relaxed coordinates */
    int nframes;         /* trajectory */
    double *frames;      /* nframes * 3n */
    double *frame_e;     /* nframes */
    int cap_frames;
} record_work;

static void record_free(record_work *w)
{
    nd_molecule_free(&w->mol);
    free(w->points);
    free(w->point_xyz);
    free(w->frames);
    free(w->frame_e);
    memset(w, 0, sizeof *w);
}

/* The potential for one record: a model bound to its atoms, or an external program. */
typedef struct {
    nd_potential *pot;
    nd_external *ext;
    nd_energy e;
} bound;

static int bind(const opt_options *o, const nd_model *model, const nd_molecule *mol, bound *b, nd_error *err)
{
    memset(b, 0, sizeof *b);
    int s;
    if (model) {
        if ((s = nd_model_check(model, mol, err)) != ND_OK)
            return s;
        if ((s = nd_potential_new(&b->pot, model, mol->natoms, mol->z, ND_POTENTIAL_MEAN, err)) != ND_OK)
            return s;
        b->e = nd_potential_energy(b->pot);
        return ND_OK;
    }
    if ((s = nd_external_new(&b->ext, o->command, mol->natoms, mol->z, mol->charge, mol->multiplicity,
                             o->timeout, err)) != ND_OK)
        return s;
    b->e = nd_external_energy(b->ext);
    return ND_OK;
}

static void unbind(bound *b)
{
    nd_potential_free(b->pot);
    nd_external_free(b->ext);
    memset(b, 0, sizeof *b);
}

/* Appends the current structure as a trajectory frame. */
static int add_frame(record_work *w, const double *x, double e)
{
    size_t n3 = 3 * (size_t)w->mol.natoms;
    if (w->nframes == w->cap_frames) {
        int cap = w->cap_frames ? 2 * w->cap_frames : 64;
        double *f = realloc(w->frames, (size_t)cap * n3 * sizeof *f);
        if (!f)
            return ND_ENOMEM;
        w->frames = f;
        double *fe = realloc(w->frame_e, (size_t)cap * sizeof *fe);
        if (!fe)
            return ND_ENOMEM;
        w->frame_e = fe;
        w->cap_frames = cap;
    }
    memcpy(w->frames + (size_t)w->nframes * n3, x, n3 * sizeof *x);
    w->frame_e[w->nframes++] = e;
    return ND_OK;
}

/* One relaxation of x (3n, updated) on pot: the set-up / iterate / test
 * loop of optimize/minimize.h, recording trajectory frames when asked.
 * Returns ND_OK (converged), ND_CONTINUE (step limit or stall) or an error. */
static int relax(const opt_options *o, const nd_energy *pot, const nd_minimize_options *mo, int n, double *x,
                 record_work *w, relax_result *rr, nd_error *err)
{
    nd_minimizer *m;
    memset(&rr->r, 0, sizeof rr->r);
    int s = nd_minimizer_new(&m, o->method, pot, n, x, mo, err);
    if (s != ND_OK)
        return s;
    rr->initial_energy = nd_minimizer_energy(m);
    if (o->trajectory && (s = add_frame(w, nd_minimizer_x(m), nd_minimizer_energy(m))) != ND_OK)
        goto done;
    nd_stop why = ND_STOP_NONE;
    for (;;) {
        if (nd_minimizer_test(m, &why) == ND_OK) {
            s = ND_OK;
            break;
        }
        if (nd_minimizer_steps(m) >= mo->stop.max_steps) {
            why = ND_STOP_STEPS;
            s = nd_fail(err, ND_CONTINUE, "not converged: step limit of %d reached with largest force %.3g "
                                          "kcal/mol/A", mo->stop.max_steps,
                        nd_converge_max_force(n, nd_minimizer_gradient(m)));
            break;
        }
        if ((s = nd_minimizer_iterate(m, err)) != ND_OK) {
            if (nd_minimizer_stalled(m)) {
                why = ND_STOP_STALLED;
                nd_error_prefix(err, "not converged");
                s = ND_CONTINUE;
            }
            break;
        }
        if (o->trajectory && (s = add_frame(w, nd_minimizer_x(m), nd_minimizer_energy(m))) != ND_OK)
            break;
    }
    memcpy(x, nd_minimizer_x(m), 3 * (size_t)n * sizeof *x);
    rr->r.converged = s == ND_OK;
    rr->r.why = why;
    rr->r.steps = nd_minimizer_steps(m);
    rr->r.force_calls = nd_minimizer_force_calls(m);
    rr->r.energy = nd_minimizer_energy(m);
    rr->r.max_force = nd_converge_max_force(n, nd_minimizer_gradient(m));
    rr->r.rms_force = nd_converge_rms_force(n, nd_minimizer_gradient(m));
    rr->r.energy_change = nd_minimizer_energy_change(m);
done:
    nd_minimizer_free(m);
    if (s == ND_ENOMEM)
        nd_fail(err, ND_ENOMEM, "out of memory");
    return s;
}

/* Marks in moving the side of the scanned bond atoms[1]-atoms[2] that is
 * turned rigidly to each angle of a scan (nd_torsion_side); returns its
 * sign, or 0 (the restraint alone moves the atoms, as in a ring) when the
 * bond is in a ring, the record has no bond table and none can be
 * perceived, or a frozen atom is on that side. */
static int scan_side(const nd_molecule *mol, const int *atoms, const unsigned char *frozen,
                     unsigned char *moving)
{
    nd_molecule perceived;
    nd_molecule_init(&perceived);
    const nd_molecule *m = mol;
    nd_error e;
    int *start = NULL, *adj = NULL, side = 0;
    if (!mol->has_bonds || mol->nbonds == 0) {
        if (nd_molecule_copy(&perceived, mol, &e) != ND_OK || nd_verify_perceive_bonds(&perceived, &e) != ND_OK)
            goto out;
        m = &perceived;
    }
    if (nd_molecule_neighbours(m, &start, &adj, &e) != ND_OK)
        goto out;
    side = nd_torsion_side(mol->natoms, start, adj, atoms[1], atoms[2], moving);
    for (int i = 0; side && frozen && i < mol->natoms; i++)
        if (frozen[i] && moving[i])
            side = 0;
out:
    free(start);
    free(adj);
    nd_molecule_free(&perceived);
    return side;
}

/* Relaxes one record (or scans it): fills w. Runs inside the parallel loop,
 * so it touches only w and read-only shared data. */
static void optimise_record(const opt_options *o, const nd_model *model, record_work *w)
{
    nd_molecule *mol = &w->mol;
    nd_error *err = &w->err;
    int n = mol->natoms, s;
    bound b;
    memset(&b, 0, sizeof b);
    nd_restraints *rs = NULL;
    nd_precond *pc = NULL;
    unsigned char *frozen = NULL, *moving = NULL;
    if (n < 1) {
        s = nd_fail(err, ND_EINPUT, "the record has no atoms");
        goto out;
    }
    if (mol->dimension != 3 && n > 1) {
        s = nd_fail(err, ND_EINPUT, "the record has no 3D coordinates (%s); nadir build makes "
                    "them from SMILES", mol->dimension == 2 ? "a 2D drawing" : "none at all");
        goto out;
    }
    if ((s = bind(o, model, mol, &b, err)) != ND_OK)
        goto out;
    nd_energy pot = b.e;
    if (o->frozen_list || o->scan_list) {
        if ((s = nd_restraints_new(&rs, &b.e, n, err)) != ND_OK)
            goto out;
        pot = nd_restraints_energy(rs);
    }
    if (o->frozen_list) {
        if (!(frozen = malloc((size_t)n))) {
            s = nd_fail(err, ND_ENOMEM, "out of memory");
            goto out;
        }
        if ((s = parse_frozen(o->frozen_list, n, frozen, err)) != ND_OK)
            goto out;
        for (int i = 0; i < n; i++)
            if (frozen[i]) {
                nd_restraints_freeze(rs, i, NULL);
                w->nfrozen++;
            }
        if (w->nfrozen == n) {
            s = nd_fail(err, ND_EINPUT, "--frozen '%s' fixes all %d atoms; nothing is left to relax",
                        o->frozen_list, n);
            goto out;
        }
    }
    int tors_index = -1, a[4], side = 0;
    if (o->scan_list) {
        sscanf(o->scan_list, "%d,%d,%d,%d", &a[0], &a[1], &a[2], &a[3]);
        for (int k = 0; k < 4; k++)
            a[k]--;
        if ((s = nd_restraints_add(rs, ND_RESTRAIN_TORSION, a, o->scan_from, SCAN_FORCE_CONSTANT, &tors_index,
                                   err)) != ND_OK) {
            nd_error_prefix(err, "--scan %s", o->scan_list);
            s = ND_EINPUT;
            err->code = ND_EINPUT;
            goto out;
        }
        if (!(moving = malloc((size_t)n))) {
            s = nd_fail(err, ND_ENOMEM, "out of memory");
            goto out;
        }
        side = scan_side(mol, a, frozen, moving);
    }
    nd_minimize_options mo;
    nd_minimize_options_default(&mo);
    if (o->modes_preset)
        nd_converge_preset_modes(&mo.stop);
    if (o->max_force > 0) {
        mo.stop.max_force = o->max_force;
        mo.stop.rms_force = 0.5 * o->max_force;
        mo.stop.energy_max_force = 5 * o->max_force;
    }
    if (o->max_steps > 0)
        mo.stop.max_steps = o->max_steps;
    if (o->method == &nd_minimizer_lbfgs && !o->no_precond) {
        if ((s = nd_precond_new(&pc, n, mol->z, mol->xyz, frozen, 0, err)) != ND_OK)
            goto out;
        mo.precond = pc;
    }
    w->npoints = 1;
    if (o->scan_list)
        w->npoints = (int)floor((o->scan_to - o->scan_from) / o->scan_step + 1e-9) + 1;
    w->points = calloc((size_t)w->npoints, sizeof *w->points);
    if (o->scan_list)
        w->point_xyz = malloc((size_t)w->npoints * 3 * (size_t)n * sizeof *w->point_xyz);
    if (!w->points || (o->scan_list && !w->point_xyz)) {
        s = nd_fail(err, ND_ENOMEM, "out of memory");
        goto out;
    }
    s = ND_OK;
    for (int k = 0; k < w->npoints; k++) {
        relax_result *rr = &w->points[k];
        if (o->scan_list) {
            rr->target = o->scan_from + k * o->scan_step;
            nd_restraints_set_target(rs, tors_index, rr->target, NULL);
            double now = nd_restraints_value(rs, tors_index, mol->xyz);
            if (side && isfinite(now)) {
                double turn = rr->target - now;
                turn -= 360 * floor((turn + 180) / 360);
                nd_torsion_turn(n, mol->xyz, moving, a[1], a[2], side * turn * M_PI / 180);
            }
        }
        nd_error e1;
        nd_error_clear(&e1);
        rr->status = relax(o, &pot, &mo, n, mol->xyz, w, rr, &e1);
        if (b.ext && rr->status != ND_OK && rr->status != ND_CONTINUE) {
            nd_error e2;
            nd_external_last_error(b.ext, &e2);
            if (e2.code != ND_OK)
                e1 = e2;
        }
        rr->energy = rr->r.energy;
        if (rs)
            rr->energy -= nd_restraints_penalty(rs, mol->xyz, NULL);
        if (o->scan_list) {
            rr->torsion = nd_restraints_value(rs, tors_index, mol->xyz);
            memcpy(w->point_xyz + (size_t)k * 3 * (size_t)n, mol->xyz, 3 * (size_t)n * sizeof(double));
        }
        if (rr->status != ND_OK && s == ND_OK) {
            s = rr->status;
            *err = e1;
            if (o->scan_list)
                nd_error_prefix(err, "scan angle %g", rr->target);
        }
        if (rr->status != ND_OK && rr->status != ND_CONTINUE) {
            w->npoints = k + 1; /* a failed potential ends the scan */
            break;
        }
    }
out:
    w->status = s;
    free(frozen);
    free(moving);
    nd_precond_free(pc);
    nd_restraints_free(rs);
    unbind(&b);
}

/* The data items of a written structure. */
static int label(nd_molecule *m, const relax_result *rr, nd_error *err)
{
    char buf[128];
    int s;
    snprintf(buf, sizeof buf, "%.6f", rr->energy);
    if ((s = nd_molecule_set_data(m, "optimize_energy", buf, err)) != ND_OK)
        return s;
    snprintf(buf, sizeof buf, "%.4g", rr->r.max_force);
    if ((s = nd_molecule_set_data(m, "optimize_max_force", buf, err)) != ND_OK)
        return s;
    snprintf(buf, sizeof buf, "%s (%s)", rr->r.converged ? "converged" : "not converged", nd_stop_name(rr->r.why));
    return nd_molecule_set_data(m, "optimize_status", buf, err);
}

static cJSON *point_json(const relax_result *rr, int scan, double emin)
{
    cJSON *j = cJSON_CreateObject();
    if (!j)
        return NULL;
    if (scan) {
        cJSON_AddNumberToObject(j, "target", rr->target);
        cJSON_AddNumberToObject(j, "torsion", rr->torsion);
    }
    cJSON_AddBoolToObject(j, "converged", rr->r.converged);
    cJSON_AddStringToObject(j, "stopped_by", nd_stop_name(rr->r.why));
    cJSON_AddNumberToObject(j, "steps", rr->r.steps);
    cJSON_AddNumberToObject(j, "force_calls", rr->r.force_calls);
    cJSON_AddNumberToObject(j, "initial_energy", rr->initial_energy);
    cJSON_AddNumberToObject(j, "energy", rr->energy);
    if (scan)
        cJSON_AddNumberToObject(j, "relative_energy", rr->energy - emin);
    cJSON_AddNumberToObject(j, "max_force", rr->r.max_force);
    cJSON_AddNumberToObject(j, "rms_force", rr->r.rms_force);
    cJSON_AddNumberToObject(j, "energy_change", rr->r.energy_change);
    return j;
}


int cmd_optimize(int argc, char **argv)
{
    opt_options o;
    int rc = parse(argc, argv, &o);
    if (rc != 0)
        return rc < 0 ? ND_EXIT_OK : rc;
    if ((rc = cli_check_output(CMD, "--report", o.report)) != 0)
        return rc;
    if ((o.output && strcmp(o.output, "-") == 0) || (o.trajectory && strcmp(o.trajectory, "-") == 0))
        return cli_usage(CMD, "%s -: standard output carries the table (or --json); give a file "
                              "name ending in .xyz or .sdf",
                         o.output && strcmp(o.output, "-") == 0 ? "-o" : "--trajectory");
    char mpath[PATH_MAX + 64];
    if (!o.command && (rc = cli_model_path(CMD, o.model, 1, mpath, sizeof mpath)) != 0)
        return rc;
    nd_error err;
    nd_error_clear(&err);
    nd_model *model = NULL;
    nd_reader *r = NULL;
    nd_writer *w = NULL, *tw = NULL;
    cJSON *doc = NULL, *records = NULL, *failures = NULL;
    record_work *work = calloc(CHUNK, sizeof *work);
    int done = 0, unconverged = 0, failed_input = 0, failed_compute = 0, header = 0, end = 0;
    rc = ND_EXIT_OK;
    if (!work)
        goto nomem;
    if (!o.command && nd_model_load(mpath, &model, &err) != ND_OK) {
        rc = cli_error(CMD, &err);
        goto out;
    }
    if (model)
        cli_model_notice(CMD, mpath, model);
    if ((rc = cli_open_structures(CMD, o.input, o.format, &r)) != 0)
        goto out;
    if (o.output && nd_writer_open(&w, o.output, ND_FORMAT_AUTO, &err) != ND_OK) {
        rc = cli_error(CMD, &err);
        goto out;
    }
    if (o.trajectory && nd_writer_open(&tw, o.trajectory, ND_FORMAT_AUTO, &err) != ND_OK) {
        rc = cli_error(CMD, &err);
        goto out;
    }
    doc = cJSON_CreateObject();
    failures = cJSON_CreateArray();
    if (!doc || !failures)
        goto nomem;
    cJSON_AddStringToObject(doc, "file", nd_reader_name(r));
    cJSON *jp = cJSON_AddObjectToObject(doc, "potential");
    if (o.command)
        cJSON_AddStringToObject(jp, "command", o.command);
    else
        cJSON_AddStringToObject(jp, "model", mpath);
    cJSON_AddStringToObject(doc, "method", o.method->name);
    cJSON_AddStringToObject(doc, "preconditioner",
                            o.method == &nd_minimizer_lbfgs && !o.no_precond ? "Lindh model Hessian" : "none");
    {
        nd_minimize_options mo;
        nd_minimize_options_default(&mo);
        if (o.modes_preset)
            nd_converge_preset_modes(&mo.stop);
        if (o.max_force > 0) {
            mo.stop.max_force = o.max_force;
            mo.stop.rms_force = 0.5 * o.max_force;
            mo.stop.energy_max_force = 5 * o.max_force;
        }
        if (o.max_steps > 0)
            mo.stop.max_steps = o.max_steps;
        cJSON *jc = cJSON_AddObjectToObject(doc, "convergence");
        cJSON_AddStringToObject(jc, "preset", o.modes_preset ? "modes" : "ranking");
        cJSON_AddNumberToObject(jc, "max_force", mo.stop.max_force);
        cJSON_AddNumberToObject(jc, "rms_force", mo.stop.rms_force);
        cJSON_AddNumberToObject(jc, "energy_change", mo.stop.energy_change);
        cJSON_AddNumberToObject(jc, "energy_change_max_force", mo.stop.energy_max_force);
        cJSON_AddNumberToObject(jc, "max_steps", mo.stop.max_steps);
    }
    cJSON_AddStringToObject(doc, "energy_unit", "kcal/mol");
    cJSON_AddStringToObject(doc, "force_unit", "kcal/mol/angstrom");
    records = cJSON_AddArrayToObject(doc, "records");
    if (!records)
        goto nomem;
    int chunk = CHUNK;
#ifdef _OPENMP
    if (o.trajectory) /* frames are kept in memory until written: keep few records in flight */
        chunk = omp_get_max_threads() < CHUNK ? omp_get_max_threads() : CHUNK;
#endif
    while (!end) {
        int nrec = 0;
        while (nrec < chunk) {
            record_work *wk = &work[nrec];
            nd_molecule_init(&wk->mol);
            int s = nd_reader_next(r, &wk->mol, &wk->err);
            if (s == ND_END) {
                nd_molecule_free(&wk->mol);
                end = 1;
                break;
            }
            wk->record = nd_reader_record(r);
            wk->read_status = s;
            nrec++;
            if (s != ND_OK && s != ND_EINPUT) {
                end = 1; /* the reader may not go on after other errors */
                break;
            }
        }
#pragma omp parallel for schedule(dynamic)
        for (int i = 0; i < nrec; i++)
            if (work[i].read_status == ND_OK)
                optimise_record(&o, model, &work[i]);
        for (int i = 0; i < nrec; i++) {
            record_work *wk = &work[i];
            int s = wk->read_status != ND_OK ? wk->read_status : wk->status;
            if (s == ND_ENOMEM)
                goto nomem;
            char title[200]; /* a copy: scans rename the record below */
            snprintf(title, sizeof title, "%.199s", wk->mol.title ? wk->mol.title : "");
            if (s != ND_OK) {
                if (wk->read_status != ND_OK) /* the reader's message names file and record */
                    fprintf(stderr, "nadir %s: %s\n", CMD, wk->err.msg);
                else {
                    char close[96] = "";
                    /* atoms on top of each other: the input is at fault, not
                     * the computation (exit 3, as in energy and modes) */
                    if ((s == ND_ECOMPUTE || s == ND_EEXTERNAL) &&
                        cli_close_contact(&wk->mol, close, sizeof close))
                        s = ND_EINPUT;
                    fprintf(stderr, "nadir %s: %s, record %d: %s%s\n", CMD, nd_reader_name(r),
                            wk->record, wk->err.msg[0] ? wk->err.msg : nd_status_name(s), close);
                }
                cJSON *f = cJSON_CreateObject();
                cJSON_AddItemToArray(failures, f);
                cJSON_AddNumberToObject(f, "record", wk->record);
                cJSON_AddStringToObject(f, "title", title);
                cJSON_AddStringToObject(f, "message", wk->err.msg);
            }
            if (s != ND_OK && s != ND_CONTINUE) {
                if (s == ND_EINPUT || s == ND_EDOMAIN || s == ND_EIO)
                    failed_input++;
                else
                    failed_compute++;
                record_free(wk);
                continue;
            }
            if (s == ND_OK)
                done++;
            else
                unconverged++;
            int n = wk->mol.natoms, scan = o.scan_list != NULL;
            double emin = INFINITY;
            int steps = 0, calls = 0;
            for (int k = 0; k < wk->npoints; k++) {
                emin = fmin(emin, wk->points[k].energy);
                steps += wk->points[k].r.steps;
                calls += wk->points[k].r.force_calls;
            }
            char where[300];
            snprintf(where, sizeof where, "%s, record %d", nd_reader_name(r), wk->record);
            int outside = cli_size_note(CMD, model, &wk->mol, where);
            cJSON *j = cJSON_CreateObject();
            cJSON_AddItemToArray(records, j);
            cJSON_AddNumberToObject(j, "record", wk->record);
            cJSON_AddStringToObject(j, "title", title);
            cJSON_AddNumberToObject(j, "atoms", n);
            cJSON_AddBoolToObject(j, "outside_training_sizes", outside);
            if (wk->nfrozen)
                cJSON_AddNumberToObject(j, "frozen_atoms", wk->nfrozen);
            if (!scan) {
                cJSON *pj = point_json(&wk->points[0], 0, 0);
                cJSON *it = pj ? pj->child : NULL;
                while (it) { /* flatten the single point into the record */
                    cJSON *next = it->next;
                    cJSON_AddItemToObject(j, it->string, cJSON_DetachItemViaPointer(pj, it));
                    it = next;
                }
                cJSON_Delete(pj);
            } else {
                cJSON_AddBoolToObject(j, "converged", s == ND_OK);
                cJSON_AddNumberToObject(j, "steps", steps);
                cJSON_AddNumberToObject(j, "force_calls", calls);
                cJSON *js = cJSON_AddObjectToObject(j, "scan");
                int a[4];
                sscanf(o.scan_list, "%d,%d,%d,%d", &a[0], &a[1], &a[2], &a[3]);
                cJSON_AddItemToObject(js, "atoms", cJSON_CreateIntArray(a, 4));
                cJSON_AddNumberToObject(js, "force_constant", SCAN_FORCE_CONSTANT);
                cJSON_AddStringToObject(js, "angle_unit", "degree");
                cJSON *pts = cJSON_AddArrayToObject(js, "points");
                for (int k = 0; k < wk->npoints; k++)
                    cJSON_AddItemToArray(pts, point_json(&wk->points[k], 1, emin));
            }
            if (!o.json) {
                if (!header) {
                    printf("%6s  %-24s  %5s  %16s  %10s  %6s  %6s  %s\n", "record", "title", "atoms", "energy",
                           "max force", "steps", "calls", "result");
                    header = 1;
                }
                const relax_result *last = &wk->points[wk->npoints - 1];
                char result[96];
                snprintf(result, sizeof result, "%s", s == ND_OK ? "converged" : s == ND_CONTINUE ? "NOT CONVERGED" : "FAILED");
                if (!scan)
                    snprintf(result + strlen(result), sizeof result - strlen(result), " (%s)", nd_stop_name(last->r.why));
                printf("%6d  %-24.24s  %5d  %16.6f  %10.5f  %6d  %6d  %s\n", wk->record, title, n,
                       scan ? emin : last->energy, last->r.max_force, steps, calls, result);
                if (scan) {
                    printf("        %10s  %10s  %16s  %10s  %6s  %s\n", "target", "torsion", "energy", "relative",
                           "calls", "result");
                    for (int k = 0; k < wk->npoints; k++) {
                        const relax_result *p = &wk->points[k];
                        printf("        %10.2f  %10.2f  %16.6f  %10.4f  %6d  %s\n", p->target, p->torsion, p->energy,
                               p->energy - emin, p->r.force_calls,
                               p->r.converged ? "converged" : "NOT CONVERGED");
                    }
                }
            }
            if (tw) {
                nd_molecule fr;
                nd_molecule_init(&fr);
                if (nd_molecule_copy(&fr, &wk->mol, &err) != ND_OK)
                    goto nomem;
                for (int f = 0; f < wk->nframes; f++) {
                    char t[256];
                    memcpy(fr.xyz, wk->frames + (size_t)f * 3 * (size_t)n, 3 * (size_t)n * sizeof(double));
                    snprintf(t, sizeof t, "%s frame %d energy %.6f kcal/mol", title, f, wk->frame_e[f]);
                    if (nd_molecule_set_title(&fr, t, &err) != ND_OK || nd_writer_write(tw, &fr, &err) != ND_OK) {
                        nd_molecule_free(&fr);
                        rc = cli_error(CMD, &err);
                        goto out;
                    }
                }
                nd_molecule_free(&fr);
            }
            if (w) {
                for (int k = 0; k < wk->npoints; k++) {
                    const relax_result *p = &wk->points[k];
                    if (scan) {
                        char t[256], v[64];
                        memcpy(wk->mol.xyz, wk->point_xyz + (size_t)k * 3 * (size_t)n, 3 * (size_t)n * sizeof(double));
                        snprintf(t, sizeof t, "%s torsion %.2f", title, p->target);
                        snprintf(v, sizeof v, "%.4f", p->torsion);
                        if (nd_molecule_set_title(&wk->mol, t, &err) != ND_OK ||
                            nd_molecule_set_data(&wk->mol, "scan_torsion", v, &err) != ND_OK)
                            goto nomem;
                    }
                    if (label(&wk->mol, p, &err) != ND_OK)
                        goto nomem;
                    if (nd_writer_write(w, &wk->mol, &err) != ND_OK) {
                        nd_error_prefix(&err, "%s, record %d", nd_reader_name(r), wk->record);
                        rc = cli_error(CMD, &err);
                        goto out;
                    }
                }
            }
            record_free(wk);
        }
    }
    cJSON_AddNumberToObject(doc, "converged", done);
    cJSON_AddNumberToObject(doc, "not_converged", unconverged);
    cJSON_AddNumberToObject(doc, "failed", failed_input + failed_compute);
    cJSON_AddItemToObject(doc, "failures", failures);
    failures = NULL;
    if ((rc = cli_finish(CMD, doc, o.json, o.report, &w, &tw)) != 0)
        goto out;
    int bad = unconverged + failed_input + failed_compute;
    if (!o.json && done + unconverged > 0)
        printf("energies in kcal/mol, forces in kcal/mol/angstrom%s; method %s%s\n",
               o.scan_list ? ", torsions in degrees" : "", o.method->name,
               o.method == &nd_minimizer_lbfgs && !o.no_precond ? " with the Lindh model-Hessian preconditioner" : "");
    if (bad > 0) {
        fprintf(stderr, "nadir %s: %d record%s converged, %d not converged, %d failed\n", CMD, done,
                done == 1 ? "" : "s", unconverged, failed_input + failed_compute);
        rc = done > 0 ? ND_EXIT_PARTIAL
             : unconverged + failed_compute > 0 ? ND_EXIT_COMPUTE
                                                 : ND_EXIT_INPUT;
    }
    goto out;
nomem:
    rc = cli_fail(CMD, ND_ENOMEM, "out of memory");
out:
    if (work)
        for (int i = 0; i < CHUNK; i++)
            record_free(&work[i]);
    free(work);
    cJSON_Delete(failures);
    cJSON_Delete(doc);
    nd_writer_abort(w);
    nd_writer_abort(tw);
    nd_reader_close(r);
    nd_model_free(model);
    return rc;
}
