/* The conformer search end to end on the analytic bonded potential of
 * tests/lib/analytic.h: n-butane's three minima, completeness against an
 * exhaustive torsion grid, no duplicates left and symmetric copies merged,
 * the same output at any thread count, stereocentres kept, stop reasons,
 * free-energy ranking and the ensemble-uncertainty callback, errors.
 * These are algorithmic checks: the potential's energies mean nothing
 * chemically (the chemistry checks are in tests/reference/, with the
 * reference method). */
#include "tests/lib/testutil.h"

#include "conformers/automorph.h"
#include "conformers/rmsd.h"
#include "conformers/sample.h"
#include "conformers/search.h"
#include "conformers/verify.h"
#include "core/smiles.h"
#include "optimize/minimize.h"
#include "optimize/modes.h"
#include "tests/lib/analytic.h"

#include <math.h>
#include <omp.h>
#include <stdlib.h>
#include <string.h>

typedef struct {
    nd_molecule m;
    nd_test_bonded *b;
    nd_energy pot;
} setup;

static void prepare(const char *smiles, setup *u)
{
    nd_error err;
    nd_molecule_init(&u->m);
    assert_int_equal(nd_smiles_parse(smiles, &u->m, &err), ND_OK);
    assert_int_equal(nd_test_bonded_new(&u->b, &u->m, &err), ND_OK);
    u->pot = (nd_energy){nd_test_bonded_energy, NULL, u->b};
}

static void release(setup *u)
{
    nd_test_bonded_free(u->b);
    nd_molecule_free(&u->m);
}

/* Runs a whole search; returns the status of the last call. */
static int run(const setup *u, const nd_search_options *o, nd_search **out)
{
    nd_error err;
    int s = nd_search_new(out, &u->m, &u->pot, o, &err);
    if (s != ND_OK)
        return s;
    while ((s = nd_search_step(*out, &err)) == ND_CONTINUE)
        ;
    if (s == ND_OK)
        s = nd_search_finish(*out, &err);
    if (s != ND_OK)
        print_message("# search: %s\n", err.msg);
    return s;
}

static void test_butane(void **state)
{
    (void)state;
    setup u;
    prepare("CCCC", &u);
    nd_search_options o;
    nd_search_options_default(&o);
    nd_search *s;
    assert_int_equal(run(&u, &o, &s), ND_OK);
    const nd_search_counts *c = nd_search_stats(s);
    /* anti and the two mirror-image gauche forms; every other relaxed
     * candidate was one of them (methyl turns and end-to-end renumbering
     * are merged by the symmetry-aware RMSD) */
    assert_int_equal(c->rotors, 1);
    assert_int_equal(c->systematic, 1);
    assert_int_equal(c->minima, 3);
    assert_true(c->duplicates > 0);
    assert_int_equal(c->stop, ND_SEARCH_QUIET);
    assert_int_equal(c->quiet, o.quiet_rounds);
    assert_int_equal(nd_search_count(s), 3);
    assert_int_equal(c->checked, 3);
    double wsum = 0;
    int anti = 0, gplus = 0, gminus = 0;
    for (int r = 0; r < 3; r++) {
        const nd_conformer *f = nd_search_conformer(s, r);
        assert_true(f->checked);
        assert_true(f->lowest_freq > 0);
        assert_true(f->rel_energy >= 0);
        assert_true(isnan(f->uncertainty));
        wsum += f->weight;
        double phi = nd_sampler_dihedral(f->xyz, 0, 1, 2, 3);
        if (fabs(phi) > 160)
            anti++;
        else if (phi > 40 && phi < 90)
            gplus++;
        else if (phi < -40 && phi > -90)
            gminus++;
    }
    assert_close(nd_search_conformer(s, 0)->rel_energy, 0.0, 0);
    assert_close(wsum, 1.0, 1e-12);
    assert_int_equal(anti, 1);
    assert_int_equal(gplus, 1);
    assert_int_equal(gminus, 1);
    /* the gauche pair is named as mirror images (the higher-ranked one
     * points to the other); anti is its own mirror image, nobody's */
    int pair = 0;
    for (int r = 0; r < 3; r++) {
        const nd_conformer *f = nd_search_conformer(s, r);
        double phi = nd_sampler_dihedral(f->xyz, 0, 1, 2, 3);
        if (fabs(phi) > 160) {
            assert_int_equal(f->mirror_of, -1);
        } else if (f->mirror_of >= 0) {
            assert_true(f->mirror_of < r);
            double phi2 = nd_sampler_dihedral(nd_search_conformer(s, f->mirror_of)->xyz, 0, 1, 2, 3);
            assert_close(phi2, -phi, 0.5);
            pair++;
        }
    }
    assert_int_equal(pair, 1);
    nd_search_free(s);
    release(&u);
}

/* Completeness: every minimum within 3 kcal/mol that an exhaustive grid of
 * starts (every rotor at 30 + 60 k degrees, between the staggered and
 * eclipsed positions so that no start sits on a symmetric stationary
 * point; 6^k starts, each relaxed, then confirmed a minimum by the
 * normal-mode check) finds is among the search's conformers. Heptane has four rotors (three under
 * the sanitizers, hexane, to keep the run short). */
static void test_complete_against_grid(void **state)
{
    (void)state;
    setup u;
    prepare(nd_test_sanitized() ? "CCCCCC" : "CCCCCCC", &u);
    nd_search_options o;
    nd_search_options_default(&o);
    o.window = 3.5;
    nd_search *s;
    assert_int_equal(run(&u, &o, &s), ND_OK);

    const nd_molecule *sm = nd_search_molecule(s);
    nd_topology t;
    memset(&t, 0, sizeof t);
    nd_sampler *smp;
    nd_dedup *dd;
    nd_verify *ver;
    assert_int_equal(nd_topology_build(sm, &t, NULL), ND_OK);
    assert_int_equal(nd_sampler_new(sm, &t, &smp, NULL), ND_OK);
    nd_dedup_options dopt = nd_dedup_defaults();
    assert_int_equal(nd_dedup_new(sm, &dopt, &dd, NULL), ND_OK);
    assert_int_equal(nd_verify_new(sm, nd_search_start(s), &ver, NULL), ND_OK);
    int nr = nd_sampler_rotors(smp), n = sm->natoms;
    assert_int_equal(nr, nd_test_sanitized() ? 3 : 4);
    int ngrid = 1;
    for (int k = 0; k < nr; k++)
        ngrid *= 6;
    size_t st = 3 * (size_t)n;
    double *gx = malloc((size_t)ngrid * st * sizeof *gx), *ge = malloc((size_t)ngrid * sizeof *ge);
    int *ok = calloc((size_t)ngrid, sizeof *ok);
#pragma omp parallel for schedule(dynamic)
    for (int g = 0; g < ngrid; g++) {
        double *x = gx + (size_t)g * st;
        memcpy(x, nd_search_start(s), st * sizeof *x);
        int rest = g;
        for (int k = 0; k < nr; k++) {
            nd_sampler_set_torsion(smp, k, 30.0 + 60.0 * (rest % 6), x);
            rest /= 6;
        }
        nd_minimize_result res;
        ge[g] = INFINITY;
        if (nd_minimize(NULL, &u.pot, n, x, NULL, &res, NULL) == ND_OK &&
            nd_verify_check(ver, x, NULL) == ND_VERIFY_OK) {
            ge[g] = res.energy;
            ok[g] = 1;
        }
    }
    double emin = INFINITY;
    for (int g = 0; g < ngrid; g++)
        if (ok[g] && ge[g] < emin)
            emin = ge[g];
    /* distinct grid minima within 3 kcal/mol */
    int *keep = malloc((size_t)ngrid * sizeof *keep);
    int nkeep = nd_dedup_mark(dd, ngrid, gx, ge, keep);
    assert_true(nkeep >= 1);
    int nlow = 0;
    for (int g = 0; g < ngrid; g++) {
        if (!ok[g] || keep[g] != -1 || ge[g] - emin > 3.0)
            continue;
        nd_molecule probe;
        nd_molecule_init(&probe);
        assert_int_equal(nd_molecule_copy(&probe, sm, NULL), ND_OK);
        memcpy(probe.xyz, gx + (size_t)g * st, st * sizeof *gx);
        nd_modes modes;
        nd_check chk;
        assert_int_equal(nd_modes_analyse(&u.pot, &probe, NULL, NULL, NULL, NULL, &modes, &chk,
                                          NULL, NULL),
                         ND_OK);
        nd_modes_free(&modes);
        nd_molecule_free(&probe);
        if (chk.verdict != ND_VERDICT_MINIMUM)
            continue;
        nlow++;
        int found = 0;
        for (int r = 0; r < nd_search_count(s) && !found; r++) {
            const nd_conformer *f = nd_search_conformer(s, r);
            if (fabs(f->energy - ge[g]) < 0.1 &&
                nd_dedup_rmsd(dd, f->xyz, gx + (size_t)g * st, NULL) < 0.25)
                found = 1;
        }
        if (!found) {
            print_message("# grid minimum %d (E %.4f) not found among %d\n", g, ge[g],
                          nd_search_count(s));
            const nd_search_counts *cc = nd_search_stats(s);
            print_message("# pool %d tried %ld checked %d notmin %d changed %d merged %d\n",
                          nd_search_minima(s), cc->tried, cc->checked, cc->not_minimum,
                          cc->changed_in_check, cc->merged_in_check);
            for (int q = 0; q < nd_search_minima(s); q++) {
                double pe;
                const double *px = nd_search_minimum(s, q, &pe);
                double rr = nd_dedup_rmsd(dd, px, gx + (size_t)g * st, NULL);
                if (rr < 0.3)
                    print_message("#   pool %d E %.4f rmsd %.3f\n", q, pe, rr);
            }
            for (int r = 0; r < nd_search_count(s); r++) {
                const nd_conformer *f = nd_search_conformer(s, r);
                print_message("#   conformer %d E %.4f rmsd %.3f\n", r, f->energy,
                              nd_dedup_rmsd(dd, f->xyz, gx + (size_t)g * st, NULL));
            }
        }
        assert_true(found);
    }
    print_message("# grid of %d starts: %d distinct minima within 3 kcal/mol, all found by the "
                  "search (%d conformers, %ld candidates)\n",
                  ngrid, nlow, nd_search_count(s), nd_search_stats(s)->tried);
    /* the grid has many low minima, so the check has teeth */
    assert_true(nlow >= (nd_test_sanitized() ? 5 : 10));
    assert_true(nd_search_conformer(s, 0)->energy <= emin + 1e-3);
    free(gx);
    free(ge);
    free(ok);
    free(keep);
    nd_verify_free(ver);
    nd_dedup_free(dd);
    nd_sampler_free(smp);
    nd_topology_free(&t);
    nd_search_free(s);
    release(&u);
}

/* No two reported conformers are within the RMSD threshold (symmetry-aware)
 * at energies within the tolerance, and a renumbered, turned copy of a
 * conformer (a symmetry permutation of the tert-butyl and isopropyl
 * methyls) is recognised as the same. */
static void test_no_duplicates_left(void **state)
{
    (void)state;
    setup u;
    prepare("CC(C)(C)CCC(C)C", &u);
    nd_search_options o;
    nd_search_options_default(&o);
    o.window = -1;
    nd_search *s;
    assert_int_equal(run(&u, &o, &s), ND_OK);
    nd_dedup *dd;
    assert_int_equal(nd_dedup_new(nd_search_molecule(s), &o.dedup, &dd, NULL), ND_OK);
    int nc = nd_search_count(s);
    assert_true(nc >= 2);
    for (int i = 0; i < nc; i++)
        for (int j = i + 1; j < nc; j++) {
            const nd_conformer *a = nd_search_conformer(s, i), *b = nd_search_conformer(s, j);
            int same = fabs(a->energy - b->energy) <= o.dedup.energy_tol &&
                       nd_dedup_rmsd(dd, a->xyz, b->xyz, NULL) < o.dedup.rmsd;
            assert_false(same);
        }
    const nd_molecule *m = nd_search_molecule(s);
    nd_automorphs au;
    int *heavy = calloc((size_t)m->natoms, sizeof *heavy);
    for (int i = 0; i < m->natoms; i++)
        heavy[i] = m->z[i] != 1;
    assert_int_equal(nd_automorphs_find(m, heavy, 2000, &au, NULL), ND_OK);
    assert_true(au.count >= 12); /* 3! of tert-butyl times 2 of isopropyl */
    const int *perm = au.perm + (size_t)(au.count - 1) * (size_t)m->natoms;
    size_t st = 3 * (size_t)m->natoms;
    double *copy = malloc(st * sizeof *copy);
    const double *x = nd_search_conformer(s, 0)->xyz;
    for (int i = 0; i < m->natoms; i++)
        memcpy(copy + 3 * perm[i], x + 3 * i, 3 * sizeof *copy);
    double rot[9] = {0.36, 0.48, -0.8, -0.8, 0.6, 0.0, 0.48, 0.64, 0.6}, sh[3] = {1.5, -2.25, 0.5};
    nd_rmsd_apply(m->natoms, copy, rot, sh);
    assert_true(nd_dedup_rmsd(dd, x, copy, NULL) < 1e-6);
    free(copy);
    free(heavy);
    nd_automorphs_free(&au);
    nd_dedup_free(dd);
    nd_search_free(s);
    release(&u);
}

/* The same seed gives the same output bit for bit at 1 and 2 threads, on a
 * molecule with rotors, a flippable ring and a planar amide. */
static void test_same_seed_same_output(void **state)
{
    (void)state;
    setup u;
    prepare("OCC1CCC(CC1)NC(=O)C", &u);
    nd_search_options o;
    nd_search_options_default(&o);
    o.seed = 20261201;
    o.max_tries = nd_test_sanitized() ? 48 : 96;
    nd_search *s1, *s2;
    omp_set_num_threads(1);
    assert_int_equal(run(&u, &o, &s1), ND_OK);
    omp_set_num_threads(2);
    assert_int_equal(run(&u, &o, &s2), ND_OK);
    const nd_search_counts *c1 = nd_search_stats(s1), *c2 = nd_search_stats(s2);
    assert_true(c1->ring_flips == 1 && c1->rotors >= 3);
    assert_int_equal(c1->tried, c2->tried);
    assert_int_equal(c1->force_calls, c2->force_calls);
    assert_int_equal(c1->minima, c2->minima);
    assert_int_equal(nd_search_count(s1), nd_search_count(s2));
    size_t st = 3 * (size_t)u.m.natoms;
    for (int r = 0; r < nd_search_count(s1); r++) {
        const nd_conformer *a = nd_search_conformer(s1, r), *b = nd_search_conformer(s2, r);
        assert_memory_equal(a->xyz, b->xyz, st * sizeof(double));
        assert_memory_equal(&a->energy, &b->energy, sizeof(double));
        assert_memory_equal(&a->weight, &b->weight, sizeof(double));
    }
    nd_search_free(s1);
    nd_search_free(s2);
    release(&u);
}

/* Stated stereocentres keep their configuration in every minimum found and
 * every conformer reported (molecule.h's signed-volume convention). */
static void test_stereo_kept(void **state)
{
    (void)state;
    setup u;
    prepare("C[C@H]1CC[C@@H](CC1)O[C@@H](C)CC", &u);
    nd_search_options o;
    nd_search_options_default(&o);
    o.max_tries = nd_test_sanitized() ? 48 : 160;
    nd_search *s;
    assert_int_equal(run(&u, &o, &s), ND_OK);
    int centres[8], nc = 0;
    nd_topology_stereo(&u.m, centres, &nc, NULL, NULL);
    assert_int_equal(nc, 3);
    int *start, *adj;
    assert_int_equal(nd_molecule_neighbours(&u.m, &start, &adj, NULL), ND_OK);
    int checked = 0;
    for (int i = 0; i < nd_search_minima(s) + nd_search_count(s); i++) {
        const double *x = i < nd_search_minima(s) ? nd_search_minimum(s, i, NULL)
                                                  : nd_search_conformer(s, i - nd_search_minima(s))->xyz;
        for (int k = 0; k < nc; k++) {
            int a = centres[k];
            const int *nb = adj + start[a];
            double v = nd_verify_signed_volume(x, a, nb[0], nb[1], nb[2]);
            assert_true(v * u.m.chirality[a] > 0);
            checked++;
        }
    }
    assert_true(checked >= 3 * 4);
    assert_true(nd_search_stats(s)->ring_flips == 1);
    free(start);
    free(adj);
    nd_search_free(s);
    release(&u);
}

static void test_budget_stop(void **state)
{
    (void)state;
    setup u;
    prepare("CCCCCCCCO", &u);
    nd_search_options o;
    nd_search_options_default(&o);
    o.max_tries = 20;
    o.check_modes = 0;
    nd_search *s;
    assert_int_equal(run(&u, &o, &s), ND_OK);
    const nd_search_counts *c = nd_search_stats(s);
    assert_int_equal(c->tried, 20);
    assert_int_equal(c->batches, 2);
    assert_int_equal(c->stop, ND_SEARCH_BUDGET);
    assert_int_equal(c->systematic, 0); /* 3^6 combinations do not fit 20 tries */
    assert_int_equal(c->checked, 0);
    assert_true(isnan(nd_search_conformer(s, 0)->lowest_freq));
    assert_int_equal(c->tried, c->clashes + c->embed_failed + c->not_converged + c->failed +
                                   c->rejected_bonding + c->rejected_stereo +
                                   c->rejected_double_bond + c->duplicates + c->minima);
    nd_search_free(s);
    release(&u);

    /* neopentane: no rotor (all methyls), no ring: one candidate only */
    prepare("CC(C)(C)C", &u);
    nd_search_options_default(&o);
    assert_int_equal(run(&u, &o, &s), ND_OK);
    assert_int_equal(nd_search_stats(s)->tried, 1);
    assert_int_equal(nd_search_stats(s)->stop, ND_SEARCH_RIGID);
    assert_int_equal(nd_search_count(s), 1);
    assert_true(nd_search_conformer(s, 0)->checked);
    nd_search_free(s);
    release(&u);
    /* cyclohexene: nothing to flip, but a ring that puckers: fresh starts */
    prepare("C1=CCCCC1", &u);
    assert_int_equal(run(&u, &o, &s), ND_OK);
    assert_int_equal(nd_search_stats(s)->stop, ND_SEARCH_QUIET);
    assert_true(nd_search_stats(s)->tried > 1);
    nd_search_free(s);
    release(&u);
}

/* Members for the uncertainty test: member j is the analytic energy times
 * (1 + 0.002 j), so the spread of a relative energy dE over 3 members is
 * 0.002 |dE| (sample standard deviation of 0, 1, 2 is 1). */
static int fake_members(void *ctx, int n, int m, const double *x, double *me)
{
    for (int i = 0; i < m; i++) {
        double e;
        int s = nd_test_bonded_energy(ctx, n, x + (size_t)i * 3 * (size_t)n, &e, NULL);
        if (s)
            return s;
        for (int j = 0; j < 3; j++)
            me[3 * i + j] = e * (1 + 0.002 * j);
    }
    return ND_OK;
}

static void test_free_energy_and_uncertainty(void **state)
{
    (void)state;
    setup u;
    prepare("CCCCC", &u);
    nd_search_options o;
    nd_search_options_default(&o);
    o.free_energy = 1;
    o.window = -1;
    o.members = fake_members;
    o.members_ctx = u.b;
    o.members_k = 3;
    o.uncertainty_mark = 0.002;
    nd_search *s;
    assert_int_equal(run(&u, &o, &s), ND_OK);
    int nc = nd_search_count(s), marked = 0;
    assert_true(nc >= 3);
    double prev = -INFINITY;
    for (int r = 0; r < nc; r++) {
        const nd_conformer *f = nd_search_conformer(s, r);
        assert_true(isfinite(f->free_energy));
        assert_true(f->rel_free_energy >= 0);
        assert_true(f->free_energy >= prev); /* ranked by free energy */
        prev = f->free_energy;
        assert_close(f->uncertainty, 0.002 * f->rel_energy, 1e-9);
        assert_int_equal(f->uncertain, f->uncertainty > 0.002);
        marked += f->uncertain;
    }
    assert_close(nd_search_conformer(s, 0)->rel_free_energy, 0.0, 0);
    assert_true(marked >= 1);
    nd_search_free(s);
    release(&u);
}

static int always_fails(void *ctx, int n, const double *x, double *e, double *g)
{
    (void)ctx;
    (void)n;
    (void)x;
    (void)e;
    (void)g;
    return ND_ECOMPUTE;
}

static int program_fails(void *ctx, int n, const double *x, double *e, double *g)
{
    (void)ctx;
    (void)n;
    (void)x;
    (void)e;
    (void)g;
    return ND_EEXTERNAL;
}

static void test_errors(void **state)
{
    (void)state;
    setup u;
    prepare("CCCO", &u);
    nd_search_options o;
    nd_search_options_default(&o);
    nd_search *s = NULL;
    nd_error err;
    /* no bond table */
    nd_molecule nb;
    nd_molecule_init(&nb);
    nd_molecule_add_atom(&nb, 6, 0, 0, 0, NULL);
    nd_molecule_add_atom(&nb, 8, 1.4, 0, 0, NULL);
    assert_int_equal(nd_search_new(&s, &nb, &u.pot, &o, &err), ND_EINPUT);
    assert_contains(err.msg, "bond table");
    assert_null(s);
    nd_molecule_free(&nb);
    /* bad options */
    o.batch = 0;
    assert_int_equal(nd_search_new(&s, &u.m, &u.pot, &o, &err), ND_EINVAL);
    nd_search_options_default(&o);
    /* every evaluation fails: candidates are counted, the molecule fails */
    nd_energy bad = {always_fails, NULL, NULL};
    o.max_tries = 16;
    assert_int_equal(nd_search_new(&s, &u.m, &bad, &o, &err), ND_OK);
    assert_int_equal(nd_search_step(s, &err), ND_OK);
    assert_int_equal(nd_search_stats(s)->failed, 16);
    assert_int_equal(nd_search_finish(s, &err), ND_ECOMPUTE);
    assert_contains(err.msg, "no minimum found");
    assert_int_equal(nd_search_count(s), 0);
    nd_search_free(s);
    /* a failing external program stops the search */
    nd_energy ext = {program_fails, NULL, NULL};
    assert_int_equal(nd_search_new(&s, &u.m, &ext, &o, &err), ND_OK);
    assert_int_equal(nd_search_step(s, &err), ND_EEXTERNAL);
    nd_search_free(s);
    /* one failing evaluation (the 40th: inside a relaxation) costs that
     * candidate only (one thread: the faulty wrapper counts calls) */
    nd_test_faulty f = {u.pot, 40, 0, 0};
    nd_energy flaky = {nd_test_faulty_energy, NULL, &f};
    omp_set_num_threads(1);
    assert_int_equal(nd_search_new(&s, &u.m, &flaky, &o, &err), ND_OK);
    assert_int_equal(nd_search_step(s, &err), ND_OK);
    assert_int_equal(nd_search_stats(s)->failed, 1);
    assert_true(nd_search_stats(s)->minima >= 1);
    assert_int_equal(nd_search_finish(s, &err), ND_OK);
    omp_set_num_threads(2);
    nd_search_free(s);
    nd_search_free(NULL);
    assert_string_equal(nd_search_stop_name(ND_SEARCH_QUIET), "no new low minima");
    release(&u);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_butane),
        cmocka_unit_test(test_complete_against_grid),
        cmocka_unit_test(test_no_duplicates_left),
        cmocka_unit_test(test_same_seed_same_output),
        cmocka_unit_test(test_stereo_kept),
        cmocka_unit_test(test_budget_stop),
        cmocka_unit_test(test_free_energy_and_uncertainty),
        cmocka_unit_test(test_errors),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
