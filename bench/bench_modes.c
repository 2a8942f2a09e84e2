/* Cost of a normal-mode analysis of a 50-atom molecule against the 6N
 * single-gradient calls it is built from.
 *
 * Molecule: decane (32 atoms) and ethylbenzene (18) from the generated test
 * set of tests/lib/analytic.c, side by side 9 A apart, 50 atoms, minimised
 * first. Potentials: the bonded analytic test potential (cheap gradients,
 * no batch call: nd_energy_batch runs the 6N structures over OpenMP
 * threads), and a learned potential with random weights of the default
 * size (nd_model_spec_defaults; its batch call evaluates the 6N structures
 * as tall matrices).
 *
 * Columns (medians of REPEATS runs, milliseconds):
 *   6N single   6N gradient calls one after the other through pot.fn, with
 *               the default OpenMP threads (a potential may thread inside
 *               one call); timed once per pot.fn: the learned rows share it
 *   6N 1-thr    the same calls with one OpenMP thread
 *   hessian     nd_hessian_compute (6N displaced structures through nd_energy_batch)
 *   modes       nd_modes_compute (mass-weighting, projection, dsyevd)
 *   thermo      nd_symmetry_find + nd_thermo_compute
 *   ratio       (hessian + modes + thermo) / 6N single: the overhead of the
 *               analysis over its gradient calls (below 1 when batching or
 *               threads pay off)
 *   ratio1      the same over 6N 1-thr (2 threads at best give 0.5) */
#include "nadir.h"
#include "tests/lib/analytic.h"

#include <omp.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

#define REPEATS 3

static double now_ms(void)
{
    struct timespec t;
    clock_gettime(CLOCK_MONOTONIC, &t);
    return (double)t.tv_sec * 1e3 + (double)t.tv_nsec * 1e-6;
}

static int cmp_double(const void *a, const void *b)
{
    double x = *(const double *)a, y = *(const double *)b;
    return (x > y) - (x < y);
}

static double median(double *v, int n)
{
    qsort(v, (size_t)n, sizeof *v, cmp_double);
    return n % 2 ? v[n / 2] : 0.5 * (v[n / 2 - 1] + v[n / 2]);
}

static int find_molecule(const char *name)
{
    for (int i = 0; i < nd_test_molecule_count(); i++)
        if (strcmp(nd_test_molecule_name(i), name) == 0)
            return i;
    return -1;
}

/* Appends b to a, shifted by dx along x. */
static int append(nd_molecule *a, const nd_molecule *b, double dx, nd_error *err)
{
    int off = a->natoms, s = ND_OK;
    for (int i = 0; i < b->natoms && s == ND_OK; i++)
        s = nd_molecule_add_atom(a, b->z[i], b->xyz[3 * i] + dx, b->xyz[3 * i + 1], b->xyz[3 * i + 2], err);
    for (int k = 0; k < b->nbonds && s == ND_OK; k++)
        s = nd_molecule_add_bond(a, b->bonds[k].a + off, b->bonds[k].b + off, b->bonds[k].order, err);
    a->has_bonds = 1;
    return s;
}

/* Times one potential. single[0], single[1] hold the median 6N-single
 * times in ms (default threads, one thread); when single[0] is already > 0
 * (the same pot.fn timed before) those values are reused. */
static int run(const char *label, const nd_energy *pot, const nd_molecule *mol, double *single)
{
    int n = mol->natoms, nc = 3 * n;
    double *h = malloc(sizeof(double) * (size_t)nc * (size_t)nc);
    double *mass = malloc(sizeof(double) * (size_t)n);
    double *g = malloc(sizeof(double) * (size_t)nc);
    double *xd = malloc(sizeof(double) * (size_t)nc);
    double *work = malloc(sizeof(double) * nd_hessian_work_size(n, n, NULL));
    double ts[REPEATS], t1s[REPEATS], th[REPEATS], tm[REPEATS], tt[REPEATS], tot[REPEATS], tot1[REPEATS];
    nd_error err;
    int status = ND_OK;
    if (!h || !mass || !g || !xd || !work || nd_modes_masses(mol, mass, &err) != ND_OK) {
        fprintf(stderr, "bench_modes: setup failed\n");
        status = ND_ENOMEM;
        goto done;
    }
    double lowest = 0;
    int nmodes = 0;
    for (int r = 0; r < REPEATS; r++) {
        double e;
        int saved = omp_get_max_threads();
        omp_set_num_threads(1);
        double u0 = now_ms();
        for (int j = 0; j < 2 * nc && status == ND_OK && *single <= 0; j++) {
            memcpy(xd, mol->xyz, sizeof(double) * (size_t)nc);
            xd[j / 2] += (j % 2) ? -ND_HESSIAN_STEP_DEFAULT : ND_HESSIAN_STEP_DEFAULT;
            status = pot->fn(pot->ctx, n, xd, &e, g);
        }
        double u1 = now_ms();
        omp_set_num_threads(saved);
        double t0 = now_ms();
        for (int j = 0; j < 2 * nc && status == ND_OK && *single <= 0; j++) {
            memcpy(xd, mol->xyz, sizeof(double) * (size_t)nc);
            xd[j / 2] += (j % 2) ? -ND_HESSIAN_STEP_DEFAULT : ND_HESSIAN_STEP_DEFAULT;
            status = pot->fn(pot->ctx, n, xd, &e, g);
        }
        double t1 = now_ms();
        if (status == ND_OK)
            status = nd_hessian_compute(pot, n, mol->xyz, NULL, NULL, work, h, NULL, NULL, &err);
        double t2 = now_ms();
        nd_modes m;
        if (status == ND_OK)
            status = nd_modes_compute(n, mol->xyz, mass, NULL, h, NULL, &m, &err);
        double t3 = now_ms();
        nd_thermo t;
        if (status == ND_OK) {
            status = nd_thermo_compute(n, mol->z, mass, mol->xyz, m.linear, m.freq, m.nmodes, NULL, &t, &err);
            lowest = m.freq[0];
            nmodes = m.nmodes;
            nd_modes_free(&m);
        }
        double t4 = now_ms();
        if (status != ND_OK) {
            fprintf(stderr, "bench_modes: %s: %s\n", label, err.msg);
            goto done;
        }
        ts[r] = *single > 0 ? *single : t1 - t0;
        t1s[r] = *single > 0 ? single[1] : u1 - u0;
        tot1[r] = (t4 - t1) / t1s[r];
        th[r] = t2 - t1;
        tm[r] = t3 - t2;
        tt[r] = t4 - t3;
        tot[r] = (t4 - t1) / ts[r];
    }
    double mts = median(ts, REPEATS), mth = median(th, REPEATS), mtm = median(tm, REPEATS);
    double mtt = median(tt, REPEATS), mr = median(tot, REPEATS);
    double mt1 = median(t1s, REPEATS), mr1 = median(tot1, REPEATS);
    single[0] = mts;
    single[1] = mt1;
    printf("%-24s %5d %10.2f %10.2f %9.2f %7.2f %7.2f %7.3f %7.3f  (%d modes, lowest %.1f cm^-1)\n",
           label, n, mts, mt1, mth, mtm, mtt, mr, mr1, nmodes, lowest);
done:
    free(h);
    free(mass);
    free(g);
    free(xd);
    free(work);
    return status;
}

int main(void)
{
    nd_error err;
    nd_molecule mol, a;
    nd_molecule_init(&mol);
    nd_molecule_init(&a);
    int ia = find_molecule("decane"), ib = find_molecule("ethylbenzene");
    if (ia < 0 || ib < 0 || nd_test_molecule_build(ia, &a, &err) != ND_OK || append(&mol, &a, 0, &err) != ND_OK ||
        nd_test_molecule_build(ib, &a, &err) != ND_OK || append(&mol, &a, 9.0, &err) != ND_OK) {
        fprintf(stderr, "bench_modes: cannot build the molecule\n");
        return 1;
    }
    nd_test_bonded *bd;
    if (nd_test_bonded_new(&bd, &mol, &err) != ND_OK) {
        fprintf(stderr, "bench_modes: %s\n", err.msg);
        return 1;
    }
    nd_energy bonded = {nd_test_bonded_energy, NULL, bd};
    nd_minimize_options mo;
    nd_minimize_options_default(&mo);
    nd_converge_preset_modes(&mo.stop);
    nd_minimize(NULL, &bonded, mol.natoms, mol.xyz, &mo, NULL, NULL);

    printf("normal-mode analysis of a 50-atom molecule (decane + ethylbenzene), %d OpenMP threads,\n"
           "medians of %d runs, milliseconds\n\n",
           omp_get_max_threads(), REPEATS);
    printf("%-24s %5s %10s %10s %9s %7s %7s %7s %7s\n", "potential", "atoms", "6N single",
           "6N 1-thr", "hessian", "modes", "thermo", "ratio", "ratio1");
    double base_bonded[2] = {0, 0}, base_learned[2] = {0, 0};
    int status = run("bonded analytic", &bonded, &mol, base_bonded);

    nd_model_spec spec;
    nd_model_spec_defaults(&spec);
    nd_model *model = NULL;
    nd_potential *p = NULL;
    if (status == ND_OK && nd_model_new(&model, &spec, 11, &err) == ND_OK &&
        nd_potential_new(&p, model, mol.natoms, mol.z, ND_POTENTIAL_MEAN, &err) == ND_OK) {
        nd_energy learned = nd_potential_energy(p);
        status = run("learned (random, batch)", &learned, &mol, base_learned);
        nd_energy single = learned;
        single.batch = NULL;
        if (status == ND_OK)
            status = run("learned (no batch call)", &single, &mol, base_learned); /* same fn: same baseline */
    } else if (status == ND_OK) {
        fprintf(stderr, "bench_modes: learned potential: %s\n", err.msg);
    }
    nd_potential_free(p);
    nd_model_free(model);
    nd_test_bonded_free(bd);
    nd_molecule_free(&mol);
    nd_molecule_free(&a);
    return status == ND_OK ? 0 : 1;
}
