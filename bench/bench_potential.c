/* Benchmark of the learned potential (energy + forces):
 *   - a 50-atom drug-like molecule at 1 and 2 threads,
 *   - a batch of 64 conformers of it,
 *   - a 35,000-atom system of small organic molecules (ethanol-sized, on a
 *     grid at liquid density with random orientations),
 * each in two modes (ensemble mean of 4 members; one member), next to the
 * FLOP bound: the time the network layers' FLOPs would take at the dgemm
 * rate measured in this run on the layer-1 shape, at the same thread count.
 * Times are medians of repeated calls. Model: nd_model_spec_defaults (H C
 * N O F S Cl, 210 features, 96-64 hidden, 4 members), random weights. */
#include "nadir.h"
#include "potential/neighbors.h"
#include "potential/network.h"
#include "core/lineio.h"
#include "core/xyz.h"

#include <cblas.h>
#include <math.h>
#include <omp.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

static double now(void)
{
    struct timespec t;
    clock_gettime(CLOCK_MONOTONIC, &t);
    return (double)t.tv_sec + 1e-9 * (double)t.tv_nsec;
}

/* CPU time of the whole process (all threads): unlike the wall clock, it
 * does not count time the scheduler gave to other programs, so it still
 * means something on a shared machine. */
static double cpu_now(void)
{
    struct timespec t;
    clock_gettime(CLOCK_PROCESS_CPUTIME_ID, &t);
    return (double)t.tv_sec + 1e-9 * (double)t.tv_nsec;
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

/* dgemm rate (FLOP/s) on rows x D times D x cols, run the way the potential
 * runs it: each of nthr OpenMP threads does its own single-threaded dgemm.
 * *cpu_rate: the same from CPU time (FLOPs / (CPU seconds / nthr)). */
static double dgemm_rate(int rows, int D, int cols, int nthr, double *cpu_rate)
{
    double *A = malloc(sizeof(double) * (size_t)(rows * D) * (size_t)nthr);
    double *B = malloc(sizeof(double) * (size_t)(D * cols));
    double *C = malloc(sizeof(double) * (size_t)(rows * cols) * (size_t)nthr);
    for (int i = 0; i < rows * D * nthr; i++)
        A[i] = 0.001 * (i % 977);
    for (int i = 0; i < D * cols; i++)
        B[i] = 0.002 * (i % 613);
    int reps = 10;
    double t[5], c[5];
    for (int r = 0; r < 5; r++) {
        double t0 = now(), c0 = cpu_now();
#pragma omp parallel num_threads(nthr)
        {
            int id = omp_get_thread_num();
            for (int k = 0; k < reps; k++)
                cblas_dgemm(CblasRowMajor, CblasNoTrans, CblasTrans, rows, cols, D, 1.0,
                            A + (size_t)id * rows * D, D, B, D, 0.0, C + (size_t)id * rows * cols,
                            cols);
        }
        t[r] = now() - t0;
        c[r] = cpu_now() - c0;
    }
    double tm = median(t, 5), cm = median(c, 5);
    free(A);
    free(B);
    free(C);
    double flops = 2.0 * rows * D * cols * reps * nthr;
    if (cpu_rate)
        *cpu_rate = flops / (cm / nthr);
    return flops / tm;
}

/* Network FLOPs per atom for energy + gradient with nk members: forward
 * 2 (D H1 + H1 H2 + H2), backward 2 (H2 H1 + H1 D) per member. */
static double net_flops_per_atom(const nd_model *m, int nk)
{
    double f = 0;
    for (int l = 1; l <= m->nhidden + 1; l++)
        f += 2.0 * m->width[l] * m->width[l - 1];
    for (int l = 1; l <= m->nhidden; l++)
        f += 2.0 * m->width[l] * m->width[l - 1];
    return f * nk;
}

/* A drug-like 50-atom molecule (composition C22 H20 N4 O3 F1): a branched
 * self-avoiding walk grown from the last few atoms, bond lengths 1.45 A
 * (1.05 A to H), every non-bonded pair at least 2.0 A apart. Not a real
 * molecule, but its neighbour counts are those of one (printed). */
static void drug_like(double *x, int *z, nd_rng *r)
{
    static const int comp[5][2] = {{6, 22}, {1, 20}, {7, 4}, {8, 3}, {9, 1}};
    int n = 0;
    for (int c = 0; c < 5; c++)
        for (int k = 0; k < comp[c][1]; k++)
            z[n++] = comp[c][0];
    for (int i = 49; i > 1; i--) { /* shuffle, keep two heavy atoms first */
        int j = 2 + (int)nd_rng_below(r, (uint64_t)(i - 1));
        int t = z[i];
        z[i] = z[j];
        z[j] = t;
    }
    int parent[50];
    x[0] = x[1] = x[2] = 0;
    for (int i = 1; i < 50; i++) {
        for (int tries = 0;; tries++) {
            int back = i < 4 ? i : 4;
            int p = i - 1 - (int)nd_rng_below(r, (uint64_t)back);
            while (z[p] == 1 && p > 0) /* hydrogens take no branches */
                p--;
            double v[3], nv = 0;
            for (int k = 0; k < 3; k++) {
                v[k] = nd_rng_normal(r);
                nv += v[k] * v[k];
            }
            double b = (z[i] == 1 ? 1.05 : 1.45) / sqrt(nv);
            for (int k = 0; k < 3; k++)
                x[3 * i + k] = x[3 * p + k] + b * v[k];
            int ok = 1;
            for (int j = 0; j < i && ok; j++) {
                double d2 = 0;
                for (int k = 0; k < 3; k++)
                    d2 += pow(x[3 * i + k] - x[3 * j + k], 2);
                ok = j == p || d2 > (tries < 1000 ? 4.0 : 1.44);
            }
            if (ok) {
                parent[i] = p;
                break;
            }
        }
    }
    (void)parent;
}

/* Mean neighbour counts of n atoms within r1 and r2 (brute force). */
static void neighbour_counts(int n, const double *x, double r1, double r2, double *c1, double *c2)
{
    long a1 = 0, a2 = 0;
    for (int i = 0; i < n; i++)
        for (int j = 0; j < n; j++) {
            if (i == j)
                continue;
            double d2 = 0;
            for (int k = 0; k < 3; k++)
                d2 += pow(x[3 * i + k] - x[3 * j + k], 2);
            a1 += d2 < r1 * r1;
            a2 += d2 < r2 * r2;
        }
    *c1 = (double)a1 / n;
    *c2 = (double)a2 / n;
}

/* Ethanol-like C2H6O geometry (approximate, angstrom; invented for the benchmark). */
static const double ETH[9][3] = {{0, 0, 0},       {1.52, 0, 0},      {2.0, 1.35, 0},
                                 {-0.39, 1.02, 0}, {-0.39, -0.51, 0.89}, {-0.39, -0.51, -0.89},
                                 {1.9, -0.52, 0.89}, {1.9, -0.52, -0.89}, {2.96, 1.3, 0}};
static const int ETHZ[9] = {6, 6, 8, 1, 1, 1, 1, 1, 1};

/* nmol ethanols on a cubic grid of spacing a (4.59 A: 96.8 A^3 per
 * molecule, ethanol's molar volume 46.07 / 0.789 cm^3/mol; from memory),
 * each rotated at random. */
static void liquid(int nmol, double *x, int *z, nd_rng *r)
{
    int side = (int)ceil(cbrt((double)nmol));
    double a = 4.59;
    for (int mIdx = 0; mIdx < nmol; mIdx++) {
        int gx = mIdx % side, gy = (mIdx / side) % side, gz = mIdx / (side * side);
        double q[4], qn = 0;
        for (int k = 0; k < 4; k++) {
            q[k] = nd_rng_normal(r);
            qn += q[k] * q[k];
        }
        qn = sqrt(qn);
        double w = q[0] / qn, b = q[1] / qn, c = q[2] / qn, d = q[3] / qn;
        double R[9] = {w * w + b * b - c * c - d * d, 2 * (b * c - w * d), 2 * (b * d + w * c),
                       2 * (b * c + w * d), w * w - b * b + c * c - d * d, 2 * (c * d - w * b),
                       2 * (b * d - w * c), 2 * (c * d + w * b), w * w - b * b - c * c + d * d};
        for (int i = 0; i < 9; i++) {
            double p[3] = {ETH[i][0] - 1.1, ETH[i][1] - 0.5, ETH[i][2]};
            int at = 9 * mIdx + i;
            z[at] = ETHZ[i];
            double o[3] = {gx * a, gy * a, gz * a};
            for (int k = 0; k < 3; k++)
                x[3 * at + k] = o[k] + R[3 * k] * p[0] + R[3 * k + 1] * p[1] + R[3 * k + 2] * p[2];
        }
    }
}

/* Median wall time of reps calls of energy + gradient for m structures;
 * median CPU time per call to *cpu. */
static double time_calls(nd_potential *p, int m, const double *x, double *e, double *g, int reps,
                         double *cpu)
{
    double t[15], c[15];
    nd_error err;
    if (nd_potential_compute(p, m, x, e, g, NULL, NULL, &err) != ND_OK) { /* warm-up */
        fprintf(stderr, "bench: %s\n", err.msg);
        exit(1);
    }
    for (int r = 0; r < reps; r++) {
        double t0 = now(), c0 = cpu_now();
        nd_potential_compute(p, m, x, e, g, NULL, NULL, NULL);
        t[r] = now() - t0;
        c[r] = cpu_now() - c0;
    }
    *cpu = median(c, reps);
    return median(t, reps);
}

/* One table row. Wall: the time and the FLOP bound from the wall-clock
 * dgemm rate measured right after, at the same thread count. CPU: the CPU
 * time divided by the threads, against the bound from the CPU-time dgemm
 * rate (what an unshared machine would show). */
static void row(const char *what, int nthr, int atoms, double t, double cpu, double flops,
                int D, int cols)
{
    /* potential.c runs calls of fewer than 256 atoms on one thread */
    if (atoms < 256)
        nthr = 1;
    double cr, wr = dgemm_rate(512, D, cols, nthr, &cr);
    double bw = flops / wr, bc = flops / cr, tc = cpu / nthr;
    printf("%-32s %3d %6d  %9.2f %8.2f %5.2f  %9.2f %8.2f %5.2f %8.2f\n", what, nthr, atoms,
           1e3 * t, 1e3 * bw, t / bw, 1e3 * tc, 1e3 * bc, tc / bc, 1e6 * tc / atoms);
}

/* One case only, for instruction counts (valgrind --tool=callgrind
 * --toggle-collect=nd_potential_compute): a warm-up call and one call of
 * energy + forces, then the energy, the gradient's norm and a fixed
 * weighted sum of its components to full precision (to compare builds).
 * Cases: molecule, batch, liquid, and liquid-tenth (389 molecules, 3,501
 * atoms, more of them at the surface; ten times quicker under callgrind);
 * modes: mean, one; model: a model file instead of the benchmark's random
 * one (its elements must cover H C N O F). */
static int run_once(const char *which, const char *mode_name, const char *path)
{
    nd_model *m;
    nd_error err;
    nd_model_spec spec;
    nd_model_spec_defaults(&spec);
    int s = path ? nd_model_load(path, &m, &err) : nd_model_new(&m, &spec, 12345, &err);
    if (s != ND_OK) {
        fprintf(stderr, "bench: %s\n", err.msg);
        return 1;
    }
    nd_rng r;
    nd_rng_seed(&r, 2024);
    enum { NB = 64, NMOL = 3889 };
    int n = 50, ms = 1;
    double *x = malloc(sizeof(double) * 3 * 9 * NMOL), *g = malloc(sizeof(double) * 3 * 9 * NMOL);
    int *z = malloc(sizeof(int) * 9 * NMOL);
    /* the structures of the table, drawn in the same order */
    double x50[150];
    drug_like(x50, z, &r);
    for (int i = 0; i < 150 * NB; i++)
        x[i] = x50[i % 150] + 0.1 * nd_rng_normal(&r);
    if (!strcmp(which, "batch")) {
        ms = NB;
    } else if (!strcmp(which, "liquid") || !strcmp(which, "liquid-tenth")) {
        int nmol = which[6] ? NMOL / 10 : NMOL;
        n = 9 * nmol;
        liquid(nmol, x, z, &r);
    } else if (!strcmp(which, "molecule")) {
        memcpy(x, x50, sizeof x50);
    } else {
        fprintf(stderr, "bench: unknown case %s (molecule, batch, liquid, liquid-tenth)\n", which);
        return 2;
    }
    int mode = !strcmp(mode_name, "one") ? 0 : ND_POTENTIAL_MEAN;
    nd_potential *p;
    double e[NB];
    if (nd_potential_new(&p, m, n, z, mode, &err) ||
        nd_potential_compute(p, ms, x, e, g, NULL, NULL, &err) ||
        nd_potential_compute(p, ms, x, e, g, NULL, NULL, &err)) {
        fprintf(stderr, "bench: %s\n", err.msg);
        return 1;
    }
    double norm = 0, mix = 0;
    for (size_t i = 0; i < 3 * (size_t)n * (size_t)ms; i++) {
        norm += g[i] * g[i];
        mix += g[i] * sin(0.7 * (double)i + 0.3);
    }
    printf("%s, %s: energy %.17g, |gradient| %.17g, weighted sum %.17g\n", which, mode_name, e[0],
           sqrt(norm), mix);
    nd_potential_free(p);
    nd_model_free(m);
    free(x);
    free(g);
    free(z);
    return 0;
}

/* The library call a conformer search makes (energy and mean gradient of
 * the ensemble, one thread) on the first structure of an XYZ file, for
 * bench_reference.sh to set beside the reference method on the same
 * molecule: a warm-up call, then the median of 21 runs of 20 calls, each
 * call on slightly displaced coordinates. Prints "ms_per_call N". */
static int time_file(const char *xyz, const char *model_path)
{
    nd_error err;
    FILE *f = fopen(xyz, "rb");
    if (!f) {
        fprintf(stderr, "bench: cannot open %s\n", xyz);
        return 1;
    }
    nd_lines l;
    nd_lines_init(&l, xyz, "frame", NULL, 0, f);
    nd_molecule mol;
    nd_molecule_init(&mol);
    int s = nd_xyz_read(&l, &mol, &err);
    nd_lines_free(&l);
    fclose(f);
    nd_model *m = NULL;
    nd_potential *p = NULL;
    if (s != ND_OK || (s = nd_model_load(model_path, &m, &err)) ||
        (s = nd_potential_new(&p, m, mol.natoms, mol.z, ND_POTENTIAL_MEAN, &err))) {
        fprintf(stderr, "bench: %s\n", s == ND_END ? "no structure in the file" : err.msg);
        nd_model_free(m);
        nd_molecule_free(&mol);
        return 1;
    }
    omp_set_num_threads(1);
    const int n = mol.natoms, calls = 20, runs = 21;
    double *x = malloc(sizeof(double) * 3 * (size_t)n), *g = malloc(sizeof(double) * 3 * (size_t)n);
    double e, t[21];
    nd_rng r;
    nd_rng_seed(&r, 11);
    memcpy(x, mol.xyz, sizeof(double) * 3 * (size_t)n);
    s = nd_potential_compute(p, 1, x, &e, g, NULL, NULL, &err);
    for (int k = 0; k < runs && s == ND_OK; k++) {
        double a = now();
        for (int c = 0; c < calls && s == ND_OK; c++) {
            for (int i = 0; i < 3 * n; i++)
                x[i] = mol.xyz[i] + 0.01 * nd_rng_normal(&r);
            s = nd_potential_compute(p, 1, x, &e, g, NULL, NULL, &err);
        }
        t[k] = (now() - a) / calls;
    }
    if (s == ND_OK)
        printf("ms_per_call %.4f\n", 1000 * median(t, runs));
    else
        fprintf(stderr, "bench: %s\n", err.msg);
    free(x);
    free(g);
    nd_potential_free(p);
    nd_model_free(m);
    nd_molecule_free(&mol);
    return s == ND_OK ? 0 : 1;
}

int main(int argc, char **argv)
{
    if (argc >= 4 && !strcmp(argv[1], "--once"))
        return run_once(argv[2], argv[3], argc > 4 ? argv[4] : NULL);
    if (argc == 4 && !strcmp(argv[1], "--time-file"))
        return time_file(argv[2], argv[3]);
    nd_model_spec spec;
    nd_model_spec_defaults(&spec);
    nd_model *m;
    nd_error err;
    if (nd_model_new(&m, &spec, 12345, &err) != ND_OK) {
        fprintf(stderr, "bench: %s\n", err.msg);
        return 1;
    }
    const int K = m->nmembers, D = m->D, H1 = m->width[1];
    double rate[3], crate[3];
    rate[1] = dgemm_rate(512, D, K * H1, 1, &crate[1]);
    rate[2] = dgemm_rate(512, D, K * H1, 2, &crate[2]);
    double load[3] = {0, 0, 0};
    if (getloadavg(load, 3) < 0)
        load[0] = -1;
    printf("model: %d elements, %d features, hidden %d-%d, %d members\n", m->nel, D, m->width[1],
           m->width[2], K);
    printf("dgemm rate (512 x %d x %d, one dgemm per thread), wall clock: 1 thread %.1f GFLOP/s, 2 "
           "threads %.1f GFLOP/s; from CPU time: %.1f and %.1f GFLOP/s\n",
           D, K * H1, 1e-9 * rate[1], 1e-9 * rate[2], 1e-9 * crate[1], 1e-9 * crate[2]);
    printf("network FLOPs per atom (energy + forces): mean of %d members %.0f, one member %.0f\n",
           K, net_flops_per_atom(m, K), net_flops_per_atom(m, 1));
    printf("machine load average at start: %.2f (2 cores; figures above 2 mean shared cores)\n\n",
           load[0]);

    nd_rng r;
    nd_rng_seed(&r, 2024);
    double x50[150];
    int z50[50];
    drug_like(x50, z50, &r);
    {
        double c1, c2;
        neighbour_counts(50, x50, nd_model_cutoff(m), m->desc.angular_cutoff, &c1, &c2);
        printf("50-atom molecule: %.1f neighbours within %.1f A, %.1f within %.1f A\n", c1,
               nd_model_cutoff(m), c2, m->desc.angular_cutoff);
    }
    enum { NB = 64 };
    double *xb = malloc(sizeof(double) * 150 * NB), *gb = malloc(sizeof(double) * 150 * NB), eb[NB];
    for (int s = 0; s < NB; s++)
        for (int i = 0; i < 150; i++)
            xb[150 * s + i] = x50[i] + 0.1 * nd_rng_normal(&r);
    int nmol = 3889; /* 35,001 atoms */
    int N = 9 * nmol;
    double *xl = malloc(sizeof(double) * 3 * (size_t)N), *gl = malloc(sizeof(double) * 3 * (size_t)N);
    int *zl = malloc(sizeof(int) * (size_t)N);
    liquid(nmol, xl, zl, &r);
    {
        /* the cell lists on the large system, against brute force for every
         * 97th atom */
        nd_neighbors nb;
        memset(&nb, 0, sizeof nb);
        double rc = nd_model_cutoff(m);
        if (nd_neighbors_build(&nb, 1, N, xl, rc, &err) != ND_OK) {
            fprintf(stderr, "bench: %s\n", err.msg);
            return 1;
        }
        long bad = 0, pairs = 0, angular = 0;
        for (int a = 0; a < N; a += 97) {
            int cnt = 0;
            for (int b = 0; b < N; b++) {
                double d2 = 0;
                for (int k = 0; k < 3; k++)
                    d2 += pow(xl[3 * b + k] - xl[3 * a + k], 2);
                if (b != a && d2 < rc * rc)
                    cnt++;
                if (b != a && d2 < pow(m->desc.angular_cutoff, 2))
                    angular++;
            }
            bad += cnt != nb.start[a + 1] - nb.start[a];
            pairs += cnt;
        }
        int sampled = (N + 96) / 97;
        printf("35,001-atom system: neighbour lists checked against brute force for %d atoms: %s;"
               " %.1f neighbours within %.1f A, %.1f within the angular cutoff %.1f A\n",
               sampled, bad ? "MISMATCH" : "all equal", (double)pairs / sampled, rc,
               (double)angular / sampled, m->desc.angular_cutoff);
        if (bad)
            return 1;
        /* linear in atoms: the search on the first tenth of the system vs all of it */
        double tn[2];
        int sizes[2] = {9 * (nmol / 10), N};
        for (int c = 0; c < 2; c++) {
            double t[5];
            for (int rep = 0; rep < 5; rep++) {
                double t0 = cpu_now();
                nd_neighbors_build(&nb, 1, sizes[c], xl, rc, NULL);
                t[rep] = cpu_now() - t0;
            }
            tn[c] = median(t, 5);
        }
        printf("neighbour search (CPU time): %d atoms %.2f ms, %d atoms %.2f ms: "
               "time ratio %.1f for atom ratio %.1f\n\n",
               sizes[0], 1e3 * tn[0], sizes[1], 1e3 * tn[1], tn[1] / tn[0],
               (double)sizes[1] / sizes[0]);
        nd_neighbors_free(&nb);
    }

    printf("%-32s %3s %6s  %9s %8s %5s  %9s %8s %5s %8s\n", "", "", "", "wall", "", "", "CPU/thr",
           "", "", "");
    printf("%-32s %3s %6s  %9s %8s %5s  %9s %8s %5s %8s\n", "case", "thr", "atoms", "ms/call",
           "bound ms", "ratio", "ms/call", "bound ms", "ratio", "us/atom");
    for (int mode = ND_POTENTIAL_MEAN; mode <= 0; mode++) {
        int nk = mode == ND_POTENTIAL_MEAN ? K : 1;
        const char *tag = mode == ND_POTENTIAL_MEAN ? "mean of 4" : "one member";
        double fpa = net_flops_per_atom(m, nk);
        nd_potential *p50, *pl;
        if (nd_potential_new(&p50, m, 50, z50, mode, &err) ||
            nd_potential_new(&pl, m, N, zl, mode, &err)) {
            fprintf(stderr, "bench: %s\n", err.msg);
            return 1;
        }
        char what[64];
        for (int t = 1; t <= 2; t++) {
            omp_set_num_threads(t);
            double e, g[150];
            double tc, cc;
            snprintf(what, sizeof what, "50-atom molecule, %s", tag);
            tc = time_calls(p50, 1, x50, &e, g, 15, &cc);
            row(what, t, 50, tc, cc, 50 * fpa, D, K * H1);
            snprintf(what, sizeof what, "batch 64 x 50 atoms, %s", tag);
            tc = time_calls(p50, NB, xb, eb, gb, 5, &cc);
            row(what, t, 50 * NB, tc, cc, 50.0 * NB * fpa, D, K * H1);
            snprintf(what, sizeof what, "35,001-atom liquid, %s", tag);
            tc = time_calls(pl, 1, xl, &e, gl, 5, &cc);
            row(what, t, N, tc, cc, (double)N * fpa, D, K * H1);
        }
        nd_potential_free(p50);
        nd_potential_free(pl);
    }
    printf("\nbound = network FLOPs / dgemm rate measured right after each case at the same thread\n"
           "count (one 512 x %d x %d dgemm per thread); ratio = time / bound; medians of repeats.\n"
           "CPU/thr = process CPU time / threads (equals wall time on an unshared machine).\n"
           "Calls of fewer than 256 atoms run on one thread (shown as thr 1 in both passes).\n",
           D, K * H1);
    free(xb);
    free(gb);
    free(xl);
    free(gl);
    free(zl);
    nd_model_free(m);
    return 0;
}
