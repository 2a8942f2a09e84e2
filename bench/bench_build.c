/* Molecules built per second: SMILES reading plus 3D embedding of a set of
 * drug-like molecules (written here from memory), median of five runs of
 * each, one thread. Also shown side by side: the share of reading in the
 * total, and the cost per structure when five starts are asked for instead
 * of one (the conformer search's use). */
#include "nadir.h"

#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

static const char *SET[][2] = {
    {"CC(=O)Oc1ccccc1C(=O)O", "aspirin"},
    {"CC(C)Cc1ccc(cc1)[C@H](C)C(=O)O", "S-ibuprofen"},
    {"CC(=O)Nc1ccc(O)cc1", "paracetamol"},
    {"Cn1cnc2c1c(=O)n(C)c(=O)n2C", "caffeine"},
    {"CN1C(=O)CN=C(c2ccccc2)c2cc(Cl)ccc21", "diazepam"},
    {"CNCCC(Oc1ccc(cc1)C(F)(F)F)c1ccccc1", "fluoxetine"},
    {"COc1ccc2[nH]c(nc2c1)S(=O)Cc1ncc(C)c(OC)c1C", "omeprazole"},
    {"Cc1ccc(cc1Nc1nccc(n1)-c1cccnc1)NC(=O)c1ccc(CN2CCN(C)CC2)cc1", "imatinib"},
    {"O=C(O)c1cn(C2CC2)c2cc(N3CCNCC3)c(F)cc2c1=O", "ciprofloxacin"},
    {"CC1(C)S[C@@H]2[C@H](NC(=O)Cc3ccccc3)C(=O)N2[C@H]1C(=O)O", "penicillin G"},
    {"C[C@@]12CC[C@H]3[C@@H](CCC4=CC(=O)CC[C@@]34C)[C@@H]1CC[C@@H]2O", "testosterone"},
    {"CCOC(=O)[C@H](CCc1ccccc1)N[C@@H](C)C(=O)N1CCC[C@H]1C(=O)O", "enalapril"},
    {"Cc1ccc(cc1)-c1cc(nn1-c1ccc(cc1)S(N)(=O)=O)C(F)(F)F", "celecoxib"},
    {"COc1cc2ncnc(Nc3ccc(F)c(Cl)c3)c2cc1OCCCN1CCOCC1", "gefitinib"},
    {"CN1CC[C@]23c4c5ccc(O)c4O[C@H]2[C@@H](O)C=C[C@H]3[C@H]1C5", "morphine"},
    {"Fc1ccc(cc1)C(=O)CCCN1CCC(O)(CC1)c1ccc(Cl)cc1", "haloperidol"},
};

static double now(void)
{
    struct timespec t;
    clock_gettime(CLOCK_MONOTONIC, &t);
    return (double)t.tv_sec + 1e-9 * (double)t.tv_nsec;
}

static int cmp_double(const void *a, const void *b)
{
    double x = *(const double *)a, y = *(const double *)b;
    return (x > y) - (x < y);
}

#define RUNS 5

int main(void)
{
    int nset = (int)(sizeof SET / sizeof SET[0]), failures = 0;
    double total_read = 0, total_one = 0, total_five = 0;
    printf("SMILES reading and 3D embedding, median of %d runs (seconds are wall clock, one "
           "thread)\n\n", RUNS);
    printf("%-14s %5s %10s %10s %12s %9s\n", "molecule", "atoms", "read ms", "build ms",
           "5 starts ms", "per start");
    for (int k = 0; k < nset; k++) {
        double tr[RUNS], t1[RUNS], t5[RUNS];
        int natoms = 0;
        for (int run = 0; run < RUNS; run++) {
            nd_molecule m;
            nd_molecule_init(&m);
            nd_error err;
            double a = now();
            if (nd_smiles_parse(SET[k][0], &m, &err) != ND_OK) {
                fprintf(stderr, "%s: %s\n", SET[k][1], err.msg);
                return 1;
            }
            double b = now();
            if (nd_embed_molecule(&m, 1, 0, NULL, &err) != ND_OK) {
                fprintf(stderr, "%s: %s\n", SET[k][1], err.msg);
                failures++;
            }
            double c = now();
            for (int s = 0; s < 5; s++)
                if (nd_embed_molecule(&m, 1, s, NULL, &err) != ND_OK)
                    failures++;
            double d = now();
            tr[run] = b - a;
            t1[run] = c - b;
            t5[run] = d - c;
            natoms = m.natoms;
            nd_molecule_free(&m);
        }
        qsort(tr, RUNS, sizeof *tr, cmp_double);
        qsort(t1, RUNS, sizeof *t1, cmp_double);
        qsort(t5, RUNS, sizeof *t5, cmp_double);
        double r = tr[RUNS / 2], o = t1[RUNS / 2], f = t5[RUNS / 2];
        total_read += r;
        total_one += o;
        total_five += f;
        printf("%-14s %5d %10.3f %10.1f %12.1f %9.2f\n", SET[k][1], natoms, 1e3 * r, 1e3 * o,
               1e3 * f, f / 5 / o);
    }
    printf("\n%d molecules: %.1f molecules built per second (reading + one structure each);\n"
           "reading is %.2f%% of that time; five starts cost %.2f x one start each\n",
           nset, nset / (total_read + total_one), 100.0 * total_read / (total_read + total_one),
           total_five / 5 / total_one);
    if (failures)
        printf("%d embeddings failed\n", failures);
    return failures ? 1 : 0;
}
