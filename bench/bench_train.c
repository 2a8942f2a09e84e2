/* Training throughput: structures per second through one epoch of the
 * trainer (forward, loss, exact gradient, Adam step), with and without the
 * force term, at 1 and 2 threads. Model: nd_model_spec_defaults's shape
 * (H C N O F S Cl, 210 features, 96-64 hidden), one member; data: 128
 * structures of 20 atoms (6 C, 2 N, 2 O, 10 H at random with at least
 * 1 angstrom between atoms, about 10 cubic angstrom per atom), labels
 * random (throughput does not depend on them). Times are medians of 5
 * epochs. */
#include "nadir.h"

#include <math.h>
#include <omp.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>
#include <unistd.h>

#define NSTRUCT 128
#define NATOM 20

static double now(void)
{
    struct timespec t;
    clock_gettime(CLOCK_MONOTONIC, &t);
    return (double)t.tv_sec + 1e-9 * (double)t.tv_nsec;
}

/* CPU seconds of the whole process (all threads). */
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

/* Writes the dataset; returns 0 on success. */
static int write_data(const char *path)
{
    FILE *f = fopen(path, "w");
    if (!f)
        return -1;
    fputs("{\"dataset\": \"nadir\", \"version\": 1}\n", f);
    nd_rng r;
    nd_rng_seed(&r, 11);
    static const int zs[NATOM] = {6, 6, 6, 6, 6, 6, 7, 7, 8, 8, 1, 1, 1, 1, 1, 1, 1, 1, 1, 1};
    const double box = cbrt(10.0 * NATOM);
    for (int s = 0; s < NSTRUCT; s++) {
        double x[3 * NATOM], F[3 * NATOM];
        for (int i = 0; i < NATOM; i++) {
            for (;;) {
                for (int c = 0; c < 3; c++)
                    x[3 * i + c] = box * nd_rng_uniform(&r);
                int ok = 1;
                for (int j = 0; j < i && ok; j++) {
                    double d2 = 0;
                    for (int c = 0; c < 3; c++)
                        d2 += (x[3 * i + c] - x[3 * j + c]) * (x[3 * i + c] - x[3 * j + c]);
                    ok = d2 > 1.0;
                }
                if (ok)
                    break;
            }
        }
        for (int c = 0; c < 3 * NATOM; c++)
            F[c] = 10 * nd_rng_normal(&r);
        nd_dataset_entry e = {0};
        e.natoms = NATOM;
        e.z = zs;
        e.xyz = x;
        e.forces = F;
        e.energy = -1000 + 10 * nd_rng_normal(&r);
        e.multiplicity = 1;
        char key[32];
        snprintf(key, sizeof key, "m%d", s % 16);
        e.key = key;
        e.id = nd_dataset_hash(NATOM, zs, x, 0, 1);
        char *line = nd_dataset_format_line(&e, NULL);
        if (!line) {
            fclose(f);
            return -1;
        }
        fputs(line, f);
        free(line);
    }
    return fclose(f);
}

/* Median seconds per epoch (wall clock); *cpu receives the median CPU
 * seconds (all threads) per epoch. */
static double epoch_time(const nd_dataset *d, const char *path, double fw, int threads,
                         double *cpu)
{
    omp_set_num_threads(threads);
    nd_train_config c;
    nd_train_config_defaults(&c);
    nd_model_spec s;
    nd_model_spec_defaults(&s);
    c.nelements = s.nelements;
    memcpy(c.z, s.z, sizeof c.z);
    c.members = 1;
    c.epochs = 100;
    c.validation_fraction = 0;
    c.force_weight = fw;
    nd_train *t;
    nd_error err;
    if (nd_train_new(&t, d, path, &c, &err)) {
        fprintf(stderr, "bench_train: %s\n", err.msg);
        return NAN;
    }
    double ts[5], cs[5];
    for (int r = 0; r < 5; r++) {
        double t0 = now(), c0 = cpu_now();
        int st = nd_train_epoch(t, NULL, &err);
        ts[r] = now() - t0;
        cs[r] = cpu_now() - c0;
        if (st != ND_CONTINUE && st != ND_OK) {
            fprintf(stderr, "bench_train: %s\n", err.msg);
            nd_train_free(t);
            return NAN;
        }
    }
    nd_train_free(t);
    qsort(ts, 5, sizeof ts[0], cmp_double);
    qsort(cs, 5, sizeof cs[0], cmp_double);
    *cpu = cs[2];
    return ts[2];
}

int main(void)
{
    char path[] = "/tmp/nadir-bench-train-XXXXXX";
    int fd = mkstemp(path);
    if (fd < 0)
        return 1;
    close(fd);
    if (write_data(path)) {
        remove(path);
        return 1;
    }
    nd_dataset *d;
    nd_error err;
    if (nd_dataset_load(&d, path, 0, NULL, &err)) {
        fprintf(stderr, "bench_train: %s\n", err.msg);
        remove(path);
        return 1;
    }
    printf("training throughput, %d structures of %d atoms (H C N O), model 210-96-64-1 "
           "(7 elements), 1 member, batch 32; median of 5 epochs\n\n",
           NSTRUCT, NATOM);
    printf("%-22s %9s %9s %9s   %9s %9s %9s   %7s\n", "", "1 thread", "", "", "2 threads", "", "",
           "2 vs 1");
    printf("%-22s %9s %9s %9s   %9s %9s %9s\n", "", "s/epoch", "struct/s", "struct/cpu-s",
           "s/epoch", "struct/s", "struct/cpu-s");
    double e1[2], e2[2];
    for (int q = 0; q < 2; q++) {
        double fw = q == 0 ? 0 : 1, c1, c2;
        e1[q] = epoch_time(d, path, fw, 1, &c1);
        e2[q] = epoch_time(d, path, fw, 2, &c2);
        printf("%-22s %9.3f %9.1f %9.1f   %9.3f %9.1f %9.1f   %6.2fx\n",
               q == 0 ? "energies only" : "energies and forces", e1[q], NSTRUCT / e1[q],
               NSTRUCT / c1, e2[q], NSTRUCT / e2[q], NSTRUCT / c2, e1[q] / e2[q]);
    }
    printf("\nthe force term costs %.2fx (1 thread) and %.2fx (2 threads) the energy-only epoch\n"
           "(struct/cpu-s counts CPU time of all threads, including OpenMP's waiting; on a\n"
           "busy machine wall-clock rates at 2 threads fall below it)\n",
           e1[1] / e1[0], e2[1] / e2[0]);
    nd_dataset_free(d);
    remove(path);
    return 0;
}
