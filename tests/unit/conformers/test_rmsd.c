/* Optimal superposition: exact recovery of known rotations, agreement with
 * numpy's SVD solution of the Kabsch problem, and no reflections. */
#include "tests/lib/testutil.h"

#include "conformers/rmsd.h"
#include "core/rng.h"

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

/* Rotation matrix from a unit quaternion drawn at random. */
static void random_rotation(nd_rng *r, double rot[9])
{
    double q[4], s = 0;
    for (int i = 0; i < 4; i++) {
        q[i] = nd_rng_normal(r);
        s += q[i] * q[i];
    }
    s = sqrt(s);
    for (int i = 0; i < 4; i++)
        q[i] /= s;
    double a = q[0], b = q[1], c = q[2], d = q[3];
    double m[9] = {a * a + b * b - c * c - d * d, 2 * (b * c - a * d), 2 * (b * d + a * c),
                   2 * (b * c + a * d), a * a - b * b + c * c - d * d, 2 * (c * d - a * b),
                   2 * (b * d - a * c), 2 * (c * d + a * b), a * a - b * b - c * c + d * d};
    memcpy(rot, m, sizeof m);
}

static void test_exact_recovery(void **state)
{
    (void)state;
    nd_rng r;
    nd_rng_seed(&r, 2385);
    for (int trial = 0; trial < 50; trial++) {
        int n = 3 + trial;
        double *a = malloc(3 * (size_t)n * sizeof *a), *b = malloc(3 * (size_t)n * sizeof *b);
        for (int i = 0; i < 3 * n; i++)
            a[i] = 4.7 * (nd_rng_uniform(&r) - 0.5);
        double rot[9], t[3] = {1.25, -3.5, 0.375};
        random_rotation(&r, rot);
        memcpy(b, a, 3 * (size_t)n * sizeof *b);
        nd_rmsd_apply(n, b, rot, t);
        double rfit[9], tfit[3];
        double d = nd_rmsd_superpose(n, a, b, rfit, tfit);
        assert_true(d < 1e-7);
        nd_rmsd_apply(n, b, rfit, tfit); /* b moved back onto a */
        for (int i = 0; i < 3 * n; i++)
            assert_close(b[i], a[i], 1e-9);
        free(a);
        free(b);
    }
}

/* A mirror image of a chiral set cannot be superposed by a rotation. */
static void test_no_reflection(void **state)
{
    (void)state;
    double a[12] = {0, 0, 0, 1.52, 0, 0, -0.5, 1.43, 0, -0.5, -0.7, 1.25};
    double b[12];
    memcpy(b, a, sizeof a);
    for (int i = 0; i < 4; i++)
        b[3 * i + 2] = -b[3 * i + 2];
    assert_true(nd_rmsd_superpose(4, a, b, NULL, NULL) > 0.1);
}

/* numpy 1.24 (Debian python3-numpy): the SVD solution of the Kabsch problem
 * with the determinant correction, on the same noisy points. */
static void test_against_numpy(void **state)
{
    (void)state;
    nd_rng r;
    nd_rng_seed(&r, 77);
    const int n = 17;
    double a[3 * 17], b[3 * 17], rot[9], t[3] = {0.3, 0.2, -0.9};
    for (int i = 0; i < 3 * n; i++)
        a[i] = 3.1 * nd_rng_normal(&r);
    random_rotation(&r, rot);
    memcpy(b, a, sizeof a);
    nd_rmsd_apply(n, b, rot, t);
    for (int i = 0; i < 3 * n; i++)
        b[i] += 0.21 * nd_rng_normal(&r);
    char path[] = "/tmp/nadir-rmsd-XXXXXX";
    int fd = mkstemp(path);
    assert_true(fd >= 0);
    FILE *f = fdopen(fd, "w");
    for (int i = 0; i < n; i++)
        fprintf(f, "%.17g %.17g %.17g %.17g %.17g %.17g\n", a[3 * i], a[3 * i + 1], a[3 * i + 2],
                b[3 * i], b[3 * i + 1], b[3 * i + 2]);
    fclose(f);
    char cmd[512];
    snprintf(cmd, sizeof cmd,
             "/usr/bin/python3 -c \"import numpy as np; d=np.loadtxt('%s'); A=d[:,:3]-d[:,:3].mean(0);"
             " B=d[:,3:]-d[:,3:].mean(0); U,S,Vt=np.linalg.svd(B.T@A); s=np.sign(np.linalg.det(U@Vt));"
             " D=np.diag([1,1,s]); R=(U@D@Vt).T; print('%%.15f'%%np.sqrt(((A-B@R.T)**2).sum()/len(A)))\"",
             path);
    FILE *p = popen(cmd, "r");
    assert_non_null(p);
    double ref = -1;
    int got = fscanf(p, "%lf", &ref);
    int rc = pclose(p);
    remove(path);
    if (got != 1 || rc != 0)
        skip(); /* numpy missing: tools/deps.sh installs it, so this only happens off-CI */
    assert_close(nd_rmsd_superpose(n, a, b, NULL, NULL), ref, 1e-10);
    assert_true(ref > 0.1); /* the noise is real: the check is not trivially zero */
}

static void test_subset_and_perm(void **state)
{
    (void)state;
    double a[9] = {0, 0, 0, 1.1, 0, 0, 0, 1.3, 0};
    double b[9] = {1.1, 0, 0, 0, 0, 0, 0, 1.3, 0}; /* atoms 0 and 1 swapped */
    int idx[3] = {0, 1, 2}, perm[3] = {1, 0, 2};
    assert_true(nd_rmsd_subset(3, idx, a, b, NULL) > 0.05);
    assert_true(nd_rmsd_subset(3, idx, a, b, perm) < 1e-9);
    assert_true(nd_rmsd_superpose(0, a, b, NULL, NULL) == 0.0);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_exact_recovery), cmocka_unit_test(test_no_reflection),
        cmocka_unit_test(test_against_numpy), cmocka_unit_test(test_subset_and_perm),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
