/* Models: construction checks, the file format (exact round trip, and
 * rejection of damaged, truncated, edited and wrong-version files with
 * messages), the checksum, accessors and domain checks. */
#include "tests/lib/testutil.h"

#include "core/molecule.h"
#include "potential/model.h"
#include "potential/network.h"
#include "potential/potential.h"

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

static nd_model *small_model(uint64_t seed)
{
    nd_model_spec s;
    nd_model_spec_defaults(&s);
    s.nhidden = 2;
    s.hidden[0] = 12;
    s.hidden[1] = 8;
    s.members = 3;
    nd_model *m;
    assert_int_equal(nd_model_new(&m, &s, seed, NULL), ND_OK);
    return m;
}

static unsigned char *read_all(const char *path, size_t *len)
{
    FILE *f = fopen(path, "rb");
    assert_non_null(f);
    fseek(f, 0, SEEK_END);
    long n = ftell(f);
    fseek(f, 0, SEEK_SET);
    unsigned char *b = malloc((size_t)n + 1);
    assert_int_equal(fread(b, 1, (size_t)n, f), (size_t)n);
    fclose(f);
    *len = (size_t)n;
    return b;
}

static void write_all(const char *path, const unsigned char *b, size_t n)
{
    FILE *f = fopen(path, "wb");
    assert_non_null(f);
    assert_int_equal(fwrite(b, 1, n, f), n);
    fclose(f);
}

/* FNV-1a 64 test vectors: "" -> cbf29ce484222325 (the offset basis),
 * "a" -> af63dc4c8601ec8c, "foobar" -> 85944171f73967e8 (the FNV test
 * suite published with the algorithm by Fowler, Noll and Vo; from memory). */
static void test_checksum_vectors(void **state)
{
    (void)state;
    assert_true(nd_model_fnv1a64(ND_FNV1A64_INIT, "", 0) == UINT64_C(0xcbf29ce484222325));
    assert_true(nd_model_fnv1a64(ND_FNV1A64_INIT, "a", 1) == UINT64_C(0xaf63dc4c8601ec8c));
    assert_true(nd_model_fnv1a64(ND_FNV1A64_INIT, "foobar", 6) == UINT64_C(0x85944171f73967e8));
}

static void test_new_and_accessors(void **state)
{
    (void)state;
    nd_model *m = small_model(3);
    const int *z;
    assert_int_equal(nd_model_elements(m, &z), 7);
    assert_int_equal(z[0], 1);
    assert_int_equal(z[6], 17);
    assert_int_equal(nd_model_members(m), 3);
    assert_int_equal(nd_model_features(m), 210);
    assert_close(nd_model_cutoff(m), 5.2, 0);
    assert_int_equal(nd_model_neutral_only(m), 1);
    /* 7 x (2 x 210 + 1) + 7 x 3 x (210*12 + 12 + 12*8 + 8 + 8 + 1) */
    assert_int_equal(nd_model_parameter_count(m), 7 * 421 + 7 * 3 * (2520 + 12 + 96 + 8 + 8 + 1));
    assert_contains(nd_model_provenance(m), "\"seed\":3");
    nd_error err;
    assert_int_equal(nd_model_set_provenance(m, "[1,2]", &err), ND_EINPUT);
    assert_int_equal(nd_model_set_provenance(m, "{\"reference\":\"test\"}", &err), ND_OK);
    assert_contains(nd_model_provenance(m), "reference");
    char dom[128];
    nd_model_domain(m, dom, sizeof dom);
    assert_string_equal(dom, "H, C, N, O, F, S, Cl; neutral molecules only");
    /* same seed, same weights; members differ */
    nd_model *m2 = small_model(3);
    assert_true(memcmp(m->params, m2->params, m->nparams * sizeof(double)) == 0);
    assert_true(nd_net_weights(m, 1, 1, 0)[0] != nd_net_weights(m, 1, 1, 1)[0]);
    nd_model *c;
    assert_int_equal(nd_model_copy(&c, m, NULL), ND_OK);
    assert_true(memcmp(m->params, c->params, m->nparams * sizeof(double)) == 0);
    nd_model_free(c);
    nd_model_free(m2);
    /* bad specs */
    nd_model_spec s;
    nd_model_spec_defaults(&s);
    s.z[1] = 1;
    assert_int_equal(nd_model_new(&m2, &s, 1, &err), ND_EINPUT);
    assert_contains(err.msg, "listed twice");
    nd_model_spec_defaults(&s);
    s.members = 0;
    assert_int_equal(nd_model_new(&m2, &s, 1, &err), ND_EINPUT);
    nd_model_spec_defaults(&s);
    s.hidden[1] = 0;
    assert_int_equal(nd_model_new(&m2, &s, 1, &err), ND_EINPUT);
    assert_null(m2);
    nd_model_free(m);
    nd_model_free(NULL);
}

static void test_domain_checks(void **state)
{
    (void)state;
    nd_model *m = small_model(4);
    nd_molecule mol;
    nd_molecule_init(&mol);
    nd_error err;
    assert_int_equal(nd_molecule_add_atom(&mol, 6, 0, 0, 0, NULL), ND_OK);
    assert_int_equal(nd_molecule_add_atom(&mol, 8, 1.2, 0, 0, NULL), ND_OK);
    assert_int_equal(nd_model_check(m, &mol, &err), ND_OK);
    assert_int_equal(nd_molecule_add_atom(&mol, 35, 2.4, 0, 0, NULL), ND_OK);
    assert_int_equal(nd_model_check(m, &mol, &err), ND_EDOMAIN);
    assert_contains(err.msg, "atom 3 (Br)");
    assert_contains(err.msg, "H, C, N, O, F, S, Cl");
    mol.z[2] = 1;
    mol.charge = 1;
    assert_int_equal(nd_model_check(m, &mol, &err), ND_EDOMAIN);
    assert_contains(err.msg, "charge +1");
    assert_contains(err.msg, "neutral molecules only");
    mol.charge = 0;
    mol.formal_charge[0] = -1;
    assert_int_equal(nd_model_check(m, &mol, &err), ND_EDOMAIN);
    assert_contains(err.msg, "charge -1");
    /* C=O with one hydrogen: formyl, 15 electrons, a radical (or an ion the
     * file does not mark) */
    mol.formal_charge[0] = 0;
    assert_int_equal(nd_model_check(m, &mol, &err), ND_EDOMAIN);
    assert_contains(err.msg, "15 electrons, an odd number");
    assert_int_equal(nd_molecule_add_atom(&mol, 1, -1.0, 0, 0, NULL), ND_OK);
    assert_int_equal(nd_model_check(m, &mol, &err), ND_OK); /* formaldehyde */
    mol.multiplicity = 3;
    assert_int_equal(nd_model_check(m, &mol, &err), ND_EDOMAIN);
    assert_contains(err.msg, "multiplicity 3");
    nd_molecule_free(&mol);
    nd_model_free(m);
}

static void test_round_trip(void **state)
{
    (void)state;
    nd_model *m = small_model(5);
    /* awkward doubles: subnormal, negative zero, many digits */
    m->params[0] = 4.9406564584124654e-324;
    m->params[1] = -0.0;
    m->params[2] = 0.1 + 0.2;
    m->desc.radial_eta[3] = 1.0 / 3.0;
    assert_int_equal(nd_model_set_provenance(m, "{\"reference\":\"demo \\\"method\\\"\",\"structures\":12}", NULL), ND_OK);
    const char *p0 = nd_test_write_temp("", ".model");
    char path[256];
    snprintf(path, sizeof path, "%s", p0);
    nd_error err;
    assert_int_equal(nd_model_save(m, path, &err), ND_OK);
    nd_model *r;
    assert_int_equal(nd_model_load(path, &r, &err), ND_OK);
    assert_int_equal(r->nparams, m->nparams);
    assert_true(memcmp(r->params, m->params, m->nparams * sizeof(double)) == 0);
    assert_true(memcmp(&r->desc, &m->desc, sizeof m->desc) == 0);
    assert_int_equal(r->nmembers, m->nmembers);
    assert_int_equal(r->nhidden, m->nhidden);
    assert_string_equal(r->provenance, m->provenance);
    /* the loaded model gives the same energies and gradients, bit for bit */
    {
        int z[4] = {6, 8, 1, 17};
        double x[12] = {0, 0, 0, 1.23, 0.1, 0, -0.5, 0.9, 0.2, -0.4, -1.1, 1.2}, e1, e2, g1[12], g2[12];
        nd_potential *p1, *p2;
        assert_int_equal(nd_potential_new(&p1, m, 4, z, ND_POTENTIAL_MEAN, NULL), ND_OK);
        assert_int_equal(nd_potential_new(&p2, r, 4, z, ND_POTENTIAL_MEAN, NULL), ND_OK);
        assert_int_equal(nd_potential_compute(p1, 1, x, &e1, g1, NULL, NULL, NULL), ND_OK);
        assert_int_equal(nd_potential_compute(p2, 1, x, &e2, g2, NULL, NULL, NULL), ND_OK);
        assert_true(memcmp(&e1, &e2, sizeof e1) == 0 && memcmp(g1, g2, sizeof g1) == 0);
        nd_potential_free(p1);
        nd_potential_free(p2);
    }
    /* saving the loaded model gives the same bytes */
    char path2[300];
    snprintf(path2, sizeof path2, "%s.again", path);
    assert_int_equal(nd_model_save(r, path2, &err), ND_OK);
    size_t l1, l2;
    unsigned char *b1 = read_all(path, &l1), *b2 = read_all(path2, &l2);
    assert_int_equal(l1, l2);
    assert_true(memcmp(b1, b2, l1) == 0);
    free(b1);
    free(b2);
    unlink(path2);
    unlink(path);
    nd_model_free(r);
    nd_model_free(m);
}

/* Energy and gradient of model m on a fixed 6-atom C/O/H/Cl molecule. */
static void eval6(const nd_model *m, double *e, double *g)
{
    static const int z[6] = {6, 8, 1, 17, 6, 1};
    static const double x[18] = {0, 0, 0, 1.23, 0.1, 0, -0.5, 0.9, 0.2, -0.4, -1.1, 1.2,
                                 1.9, 1.35, 0.4, 2.6, 0.8, 1.1};
    nd_potential *p;
    assert_int_equal(nd_potential_new(&p, m, 6, z, ND_POTENTIAL_MEAN, NULL), ND_OK);
    assert_int_equal(nd_potential_compute(p, 1, x, e, g, NULL, NULL, NULL), ND_OK);
    nd_potential_free(p);
}

/* nd_model_widen: the old functions in another order plus new ones give
 * the same energies and gradients (the new features at zero weight, the
 * old ones moved to where the new descriptor puts them); a new feature's
 * weight then changes the energy; and what is not a widening is refused. */
static void test_widen(void **state)
{
    (void)state;
    nd_model *m = small_model(9);
    /* unround scaling, so a feature moved to the wrong place would show */
    for (int f = 0; f < m->nel * m->D; f++) {
        m->mu[f] = 0.013 * (f % 7) - 0.02;
        m->scale[f] = 0.71 + 0.037 * (f % 5);
    }
    const nd_descriptor_params *o = nd_model_descriptor(m);
    nd_descriptor_params p = *o;
    /* reversed radial order plus two new Gaussians; angular sets rotated by
     * one plus three new ones */
    p.nradial = o->nradial + 2;
    for (int i = 0; i < o->nradial; i++) {
        p.radial_eta[o->nradial - 1 - i] = o->radial_eta[i];
        p.radial_shift[o->nradial - 1 - i] = o->radial_shift[i];
    }
    p.radial_eta[o->nradial] = 2.345;
    p.radial_shift[o->nradial] = 1.385;
    p.radial_eta[o->nradial + 1] = 0.875;
    p.radial_shift[o->nradial + 1] = 3.15;
    p.nangular = o->nangular + 3;
    for (int i = 0; i < o->nangular; i++) {
        int j = (i + 1) % o->nangular;
        p.angular_eta[j] = o->angular_eta[i];
        p.angular_zeta[j] = o->angular_zeta[i];
        p.angular_lambda[j] = o->angular_lambda[i];
    }
    for (int i = o->nangular; i < p.nangular; i++) {
        p.angular_eta[i] = 0.25 + 0.125 * i;
        p.angular_zeta[i] = 8;
        p.angular_lambda[i] = i % 2 ? 1 : -1;
    }
    nd_model *w;
    nd_error err;
    unsigned char is_new[4096];
    assert_int_equal(nd_model_widen(&w, m, &p, is_new, &err), ND_OK);
    assert_int_equal(nd_model_features(w), nd_descriptor_size(&p, m->nel));
    int nnew = 0;
    for (int f = 0; f < w->D; f++)
        nnew += is_new[f];
    assert_int_equal(nnew, w->D - m->D);
    double e1, e2, g1[18], g2[18];
    eval6(m, &e1, g1);
    eval6(w, &e2, g2);
    assert_rel_close(e2, e1, 1e-12, 1.0);
    for (int i = 0; i < 18; i++)
        assert_rel_close(g2[i], g1[i], 1e-10, 1e-6);
    /* the new features are wired in: a weight on one of them moves the
     * energy */
    int fnew = 0;
    while (!is_new[fnew])
        fnew++;
    double *w1 = nd_net_weights(w, 1, 1, 0); /* element slot 1 (C), member 0 */
    for (int j = 0; j < w->width[1]; j++)
        w1[(size_t)j * w->D + fnew] = 0.3;
    eval6(w, &e2, g2);
    assert_true(fabs(e2 - e1) > 1e-6);
    nd_model_free(w);
    /* not widenings */
    nd_descriptor_params q = p;
    q.radial_cutoff = o->radial_cutoff + 0.5;
    assert_int_equal(nd_model_widen(&w, m, &q, NULL, &err), ND_EINPUT);
    assert_null(w);
    assert_contains(err.msg, "radial cutoff");
    q = p;
    q.angular_cutoff = o->angular_cutoff - 0.25;
    assert_int_equal(nd_model_widen(&w, m, &q, NULL, &err), ND_EINPUT);
    assert_contains(err.msg, "angular cutoff");
    q = p;
    q.angular_zeta[0] = 16; /* was the model's last angular set */
    assert_int_equal(nd_model_widen(&w, m, &q, NULL, &err), ND_EINPUT);
    assert_contains(err.msg, "lacks the model's angular set");
    q = p;
    q.radial_shift[0] += 1e-9;
    assert_int_equal(nd_model_widen(&w, m, &q, NULL, &err), ND_EINPUT);
    assert_contains(err.msg, "lacks the model's radial function");
    nd_model_free(m);
}

/* Loads b (n bytes) as a model file and expects ND_EINPUT with msg. */
static void expect_reject(const char *path, const unsigned char *b, size_t n, const char *msg)
{
    write_all(path, b, n);
    nd_model *r = (nd_model *)1;
    nd_error err;
    assert_int_equal(nd_model_load(path, &r, &err), ND_EINPUT);
    assert_null(r);
    assert_contains(err.msg, path);
    assert_contains(err.msg, msg);
}

static void test_rejects(void **state)
{
    (void)state;
    nd_model *m = small_model(6);
    char path[256];
    snprintf(path, sizeof path, "%s", nd_test_write_temp("", ".model"));
    assert_int_equal(nd_model_save(m, path, NULL), ND_OK);
    size_t n;
    unsigned char *b = read_all(path, &n), *c = malloc(n + 64);
    /* a flipped bit in the weights */
    memcpy(c, b, n);
    c[n - 100] ^= 0x10;
    expect_reject(path, c, n, "checksum mismatch");
    /* an edited header (a cutoff changed) */
    memcpy(c, b, n);
    char *rc = strstr((char *)c, "5.2");
    assert_non_null(rc);
    rc[2] = '3';
    expect_reject(path, c, n, "checksum mismatch");
    /* truncated anywhere */
    expect_reject(path, b, n - 1, "truncated");
    expect_reject(path, b, n / 2, "truncated");
    expect_reject(path, b, 20, "truncated");
    expect_reject(path, b, 0, "not a nadir model file");
    /* trailing bytes after the checksum line */
    memcpy(c, b, n);
    memcpy(c + n, "xx", 2);
    expect_reject(path, c, n + 2, "truncated or damaged");
    /* another format version */
    memcpy(c, b, n);
    c[12] = '2';
    expect_reject(path, c, n, "format version 2");
    /* another kind of file */
    expect_reject(path, (const unsigned char *)"3\nwater\nO 0 0 0\n", 16, "not a nadir model file");
    /* a valid checksum over an inconsistent header: weights count */
    {
        char *hdr = strstr((char *)b, "\"count\":");
        assert_non_null(hdr);
        memcpy(c, b, n);
        size_t off = (size_t)(hdr - (char *)b) + 8;
        while (c[off] == ' ' || c[off] == '\t')
            off++;
        c[off] = c[off] == '9' ? '8' : (unsigned char)(c[off] + 1);
        uint64_t h = nd_model_fnv1a64(ND_FNV1A64_INIT, c, n - 35);
        char tr[40];
        snprintf(tr, sizeof tr, "\nchecksum fnv1a64 %016llx\n", (unsigned long long)h);
        memcpy(c + n - 35, tr, 35);
        expect_reject(path, c, n, "weights but its architecture needs");
    }
    /* missing file */
    nd_model *r;
    nd_error err;
    assert_int_equal(nd_model_load("/nonexistent/dir/x.model", &r, &err), ND_EIO);
    assert_contains(err.msg, "/nonexistent/dir/x.model");
    /* a directory: the reason is named */
    assert_int_equal(nd_model_load("/tmp", &r, &err), ND_EIO);
    assert_contains(err.msg, "Is a directory");
    assert_int_equal(nd_model_save(m, "/nonexistent/dir/x.model", &err), ND_EIO);
    unlink(path);
    free(b);
    free(c);
    nd_model_free(m);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_checksum_vectors), cmocka_unit_test(test_new_and_accessors),
        cmocka_unit_test(test_domain_checks),    cmocka_unit_test(test_round_trip),
        cmocka_unit_test(test_rejects),         cmocka_unit_test(test_widen),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
