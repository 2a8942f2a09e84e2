/* Embedding: every molecule of the diverse corpus gets a 3D structure with
 * bond lengths, contacts and stereo checked here independently of the
 * embedding's own check; the bond model against handbook lengths; the
 * textbook configurations of amino acids and other molecules through a
 * small CIP implementation; determinism, distinct starts, parts, errors. */
#include "tests/lib/testutil.h"

#include "conformers/embed.h"
#include "conformers/topology.h"
#include "core/smiles.h"

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#define DEG (3.14159265358979323846 / 180.0)

static void parse(const char *smi, nd_molecule *m)
{
    nd_error err;
    if (nd_smiles_parse(smi, m, &err) != ND_OK)
        fail_msg("%s: %s", smi, err.msg);
}

static void embed(nd_molecule *m, uint64_t seed, int index, const char *what)
{
    nd_error err;
    if (nd_embed_molecule(m, seed, index, NULL, &err) != ND_OK)
        fail_msg("%s: %s", what, err.msg);
    assert_int_equal(m->dimension, 3);
}

static double dist(const double *x, int i, int j)
{
    double d = 0;
    for (int k = 0; k < 3; k++)
        d += (x[3 * i + k] - x[3 * j + k]) * (x[3 * i + k] - x[3 * j + k]);
    return sqrt(d);
}

static double angle(const double *x, int i, int j, int k)
{
    double u[3], v[3], uv = 0, uu = 0, vv = 0;
    for (int q = 0; q < 3; q++) {
        u[q] = x[3 * i + q] - x[3 * j + q];
        v[q] = x[3 * k + q] - x[3 * j + q];
        uv += u[q] * v[q];
        uu += u[q] * u[q];
        vv += v[q] * v[q];
    }
    return acos(uv / sqrt(uu * vv));
}

static double signed_volume(const double *x, int c, int a, int b, int d)
{
    double u[3], v[3], w[3];
    for (int k = 0; k < 3; k++) {
        u[k] = x[3 * a + k] - x[3 * c + k];
        v[k] = x[3 * b + k] - x[3 * c + k];
        w[k] = x[3 * d + k] - x[3 * c + k];
    }
    return u[0] * (v[1] * w[2] - v[2] * w[1]) + u[1] * (v[2] * w[0] - v[0] * w[2]) +
           u[2] * (v[0] * w[1] - v[1] * w[0]);
}

static double dihedral(const double *x, int i, int j, int k, int l)
{
    double b1[3], b2[3], b3[3];
    for (int q = 0; q < 3; q++) {
        b1[q] = x[3 * j + q] - x[3 * i + q];
        b2[q] = x[3 * k + q] - x[3 * j + q];
        b3[q] = x[3 * l + q] - x[3 * k + q];
    }
    double n1[3] = {b1[1] * b2[2] - b1[2] * b2[1], b1[2] * b2[0] - b1[0] * b2[2], b1[0] * b2[1] - b1[1] * b2[0]};
    double n2[3] = {b2[1] * b3[2] - b2[2] * b3[1], b2[2] * b3[0] - b2[0] * b3[2], b2[0] * b3[1] - b2[1] * b3[0]};
    double nb = sqrt(b2[0] * b2[0] + b2[1] * b2[1] + b2[2] * b2[2]);
    double m1[3] = {n1[1] * b2[2] - n1[2] * b2[1], n1[2] * b2[0] - n1[0] * b2[2], n1[0] * b2[1] - n1[1] * b2[0]};
    double xx = n1[0] * n2[0] + n1[1] * n2[1] + n1[2] * n2[2];
    double yy = (m1[0] * n2[0] + m1[1] * n2[1] + m1[2] * n2[2]) / nb;
    return atan2(yy, xx);
}

/* Bondi van der Waals radii (J. Phys. Chem. 68, 441, 1964; from memory),
 * kept here apart from the library's table. */
static double bondi(int z)
{
    switch (z) {
    case 1: return 1.20;
    case 6: return 1.70;
    case 7: return 1.55;
    case 8: return 1.52;
    case 9: return 1.47;
    case 15: return 1.80;
    case 16: return 1.80;
    case 17: return 1.75;
    case 35: return 1.85;
    case 53: return 1.98;
    default: return 2.0;
    }
}

/* Neighbours of i (sorted ascending) into out; returns the count. */
static int neighbours(const nd_molecule *m, int i, int *out, int max)
{
    int k = 0;
    for (int b = 0; b < m->nbonds; b++) {
        int o = m->bonds[b].a == i ? m->bonds[b].b : m->bonds[b].b == i ? m->bonds[b].a : -1;
        if (o >= 0 && k < max)
            out[k++] = o;
    }
    for (int p = 1; p < k; p++)
        for (int q = p; q > 0 && out[q - 1] > out[q]; q--) {
            int t = out[q];
            out[q] = out[q - 1];
            out[q - 1] = t;
        }
    return k;
}

/* Topological distances (bonds on the shortest path; -1 between parts),
 * n*n, by breadth-first search from every atom. Caller frees. */
static int *graph_distances(const nd_molecule *m)
{
    int n = m->natoms;
    int *d = malloc((size_t)n * (size_t)n * sizeof *d), *q = malloc((size_t)n * sizeof *q);
    for (int s = 0; s < n; s++) {
        int *row = d + (size_t)s * (size_t)n;
        for (int i = 0; i < n; i++)
            row[i] = -1;
        int h = 0, t = 0;
        q[t++] = s;
        row[s] = 0;
        while (h < t) {
            int u = q[h++], nb[16];
            int c = neighbours(m, u, nb, 16);
            for (int k = 0; k < c; k++)
                if (row[nb[k]] < 0) {
                    row[nb[k]] = row[u] + 1;
                    q[t++] = nb[k];
                }
        }
    }
    free(q);
    return d;
}

static int count_h(const nd_molecule *m)
{
    int c = 0;
    for (int i = 0; i < m->natoms; i++)
        c += m->z[i] == 1;
    return c;
}

typedef struct {
    int molecules, embedded, stereocentres, double_bonds, angles;
    double worst_bond, closest;
} corpus_stats;

/* The checks on one embedded molecule; fails the test on a violation. */
static void check_structure(const nd_molecule *m, const char *name, corpus_stats *st)
{
    const double *x = m->xyz;
    nd_topology t;
    nd_error err;
    assert_int_equal(nd_topology_build(m, &t, &err), ND_OK);
    for (int i = 0; i < 3 * m->natoms; i++)
        assert_true(isfinite(x[i]));
    /* bonds within 0.1 A of the model's target */
    for (int b = 0; b < m->nbonds; b++) {
        double dev = fabs(dist(x, m->bonds[b].a, m->bonds[b].b) - nd_embed_bond_length(m, &t, b));
        if (dev > st->worst_bond)
            st->worst_bond = dev;
        if (dev > 0.1)
            fail_msg("%s: bond %d-%d off by %.3f A", name, m->bonds[b].a + 1, m->bonds[b].b + 1, dev);
    }
    /* atoms three or more bonds apart (or in different parts) no closer
     * than 0.6 of the sum of their van der Waals radii (common practice,
     * no source: a clash test, not a packing one) */
    int *gd = graph_distances(m);
    for (int i = 0; i < m->natoms; i++)
        for (int j = i + 1; j < m->natoms; j++) {
            int g = gd[(size_t)i * (size_t)m->natoms + (size_t)j];
            if (g >= 0 && g < 3)
                continue;
            double r = dist(x, i, j) / (bondi(m->z[i]) + bondi(m->z[j]));
            if (r < st->closest)
                st->closest = r;
            if (r < 0.6)
                fail_msg("%s: atoms %d and %d (%d bonds apart) at %.2f A", name, i + 1, j + 1, g,
                         dist(x, i, j));
        }
    free(gd);
    /* tetrahedral stereo: sign of the signed volume of the three
     * lowest-index neighbours (molecule.h) */
    for (int c = 0; c < m->natoms; c++) {
        if (!m->chirality[c])
            continue;
        int nb[8];
        int k = neighbours(m, c, nb, 8);
        assert_true(k >= 3);
        double v = signed_volume(x, c, nb[0], nb[1], nb[2]);
        if (v * m->chirality[c] <= 0)
            fail_msg("%s: centre %d has volume %.3f, chirality %d", name, c + 1, v, m->chirality[c]);
        st->stereocentres++;
    }
    /* cis/trans from the dihedral of the lowest-index neighbours */
    for (int b = 0; b < m->nbonds; b++) {
        const nd_bond *bd = &m->bonds[b];
        if (bd->order != ND_BOND_DOUBLE || bd->config == ND_DB_NONE)
            continue;
        int na[8], nb[8], la = -1, lb = -1;
        int ka = neighbours(m, bd->a, na, 8), kb = neighbours(m, bd->b, nb, 8);
        for (int q = 0; q < ka && la < 0; q++)
            if (na[q] != bd->b)
                la = na[q];
        for (int q = 0; q < kb && lb < 0; q++)
            if (nb[q] != bd->a)
                lb = nb[q];
        double phi = fabs(dihedral(x, la, bd->a, bd->b, lb)) / DEG;
        int ok = bd->config == ND_DB_CIS ? phi < 30 : phi > 150;
        if (!ok)
            fail_msg("%s: double bond %d-%d dihedral %.1f, config %d", name, bd->a + 1, bd->b + 1,
                     phi, bd->config);
        st->double_bonds++;
    }
    /* angles at atoms outside rings within 8 degrees of the textbook
     * (VSEPR) values for their hybridisation: 109.47 tetrahedral, 120
     * trigonal, 180 linear; 100 at two-coordinate S and P, which the
     * embedding takes from dimethyl sulfide (from memory) */
    for (int j = 0; j < m->natoms; j++) {
        int h = t.hyb[j], deg = nd_topology_degree(&t, j);
        if (h == ND_HYB_NONE || t.atom_rings[j] || deg > 4)
            continue;
        double ideal = h == ND_HYB_SP ? 180.0 : h == ND_HYB_SP2 ? 120.0 : 109.47;
        if (h == ND_HYB_SP3 && deg == 2 && (m->z[j] == 16 || m->z[j] == 15 || m->z[j] == 34))
            ideal = 100.0;
        for (int p = t.start[j]; p < t.start[j + 1]; p++)
            for (int q = p + 1; q < t.start[j + 1]; q++) {
                double a = angle(x, t.nbr[p], j, t.nbr[q]) / DEG;
                if (fabs(a - ideal) > 8.0)
                    fail_msg("%s: angle %d-%d-%d is %.1f degrees, ideal %.1f", name, t.nbr[p] + 1,
                             j + 1, t.nbr[q] + 1, a, ideal);
                st->angles++;
            }
    }
    /* flat rings flat: every torsion inside the ring within 20 degrees of 0 */
    for (int r = 0; r < t.nrings; r++) {
        if (!t.ring_flat[r])
            continue;
        int s = t.ring_start[r], len = t.ring_start[r + 1] - s;
        for (int q = 0; q < len; q++) {
            int a = t.ring_atoms[s + q], b = t.ring_atoms[s + (q + 1) % len];
            int c = t.ring_atoms[s + (q + 2) % len], d = t.ring_atoms[s + (q + 3) % len];
            if (len == 3)
                break;
            double phi = fabs(dihedral(x, a, b, c, d)) / DEG;
            if (phi > 20)
                fail_msg("%s: flat ring %d has a torsion of %.1f degrees", name, r + 1, phi);
        }
    }
    nd_topology_free(&t);
}

/* The whole diverse corpus (under the sanitizers every third molecule). */
static void test_corpus(void **state)
{
    (void)state;
    FILE *f = fopen("tests/data/smiles/diverse.smi", "r");
    assert_non_null(f);
    char line[1024];
    int step = nd_test_sanitized() ? 3 : 1, k = 0;
    corpus_stats st = {0, 0, 0, 0, 0, 0.0, 1e9};
    while (fgets(line, sizeof line, f)) {
        if (line[0] == '#' || line[0] == '\n')
            continue;
        if (k++ % step)
            continue;
        nd_molecule m;
        nd_molecule_init(&m);
        parse(line, &m);
        line[strcspn(line, "\n")] = '\0';
        st.molecules++;
        embed(&m, 2026, 0, line);
        st.embedded++;
        check_structure(&m, line, &st);
        nd_molecule_free(&m);
    }
    fclose(f);
    printf("# embedded %d of %d molecules; %d stereocentres, %d double bonds, %d acyclic angles "
           "checked; worst bond deviation %.4f A; closest contact %.3f of the vdW sum\n",
           st.embedded, st.molecules, st.stereocentres, st.double_bonds, st.angles, st.worst_bond,
           st.closest);
    assert_int_equal(st.embedded, st.molecules);
    assert_true(st.molecules >= (nd_test_sanitized() ? 100 : 300));
}

/* The bond model against experimental lengths (F. H. Allen et al., "Tables
 * of bond lengths determined by X-ray and neutron diffraction", J. Chem.
 * Soc. Perkin Trans. 2, 1987, S1-S19; values from memory): Csp3-Csp3
 * 1.53, aromatic C-C 1.39 (benzene 1.397 gas-phase), C=C 1.34, C#C 1.20,
 * C-H 1.09, C=O (ketone) 1.21, C-O (alcohol) 1.43, C#N 1.14, C-N (amine)
 * 1.47, C-Cl 1.79, C-F 1.35, O-H 0.97, N-H 1.01, S=O (sulfone) 1.44, amide
 * C-N 1.33. Tolerance 0.06 A. */
static void test_bond_model(void **state)
{
    (void)state;
    static const struct {
        const char *smi;
        int a, b;
        double len;
    } cases[] = {
        {"CC", 0, 1, 1.53},       {"c1ccccc1", 0, 1, 1.39},   {"C=C", 0, 1, 1.34},
        {"C#C", 0, 1, 1.20},      {"C", 0, 1, 1.09},          {"CC(C)=O", 1, 3, 1.21},
        {"CO", 0, 1, 1.43},       {"CC#N", 1, 2, 1.14},       {"CN", 0, 1, 1.47},
        {"CCl", 0, 1, 1.79},      {"CF", 0, 1, 1.35},         {"O", 0, 1, 0.97},
        {"N", 0, 1, 1.01},        {"CS(C)(=O)=O", 1, 3, 1.44}, {"CC(=O)NC", 1, 3, 1.33},
    };
    for (size_t k = 0; k < sizeof cases / sizeof cases[0]; k++) {
        nd_molecule m;
        nd_topology t;
        nd_molecule_init(&m);
        parse(cases[k].smi, &m);
        assert_int_equal(nd_topology_build(&m, &t, NULL), ND_OK);
        int b = nd_topology_bond(&t, cases[k].a, cases[k].b);
        assert_true(b >= 0);
        double L = nd_embed_bond_length(&m, &t, b);
        if (fabs(L - cases[k].len) > 0.06)
            fail_msg("%s bond %d-%d: model %.3f, experiment %.2f", cases[k].smi, cases[k].a,
                     cases[k].b, L, cases[k].len);
        nd_topology_free(&t);
        nd_molecule_free(&m);
    }
}

/* Angles of embedded molecules against their textbook geometry: benzene
 * C-C-C 120 degrees and planar, methane H-C-H 109.5, acetylene linear,
 * cyclopropane C-C-C 60, ethylene planar (VSEPR and experiment; common
 * knowledge, from memory). Tolerance 4 degrees. */
static void test_angles(void **state)
{
    (void)state;
    nd_molecule m;
    nd_molecule_init(&m);
    parse("c1ccccc1", &m);
    embed(&m, 7, 0, "benzene");
    for (int i = 0; i < 6; i++)
        assert_close(angle(m.xyz, i, (i + 1) % 6, (i + 2) % 6) / DEG, 120.0, 4.0);
    for (int i = 0; i < 6; i++)
        assert_close(dihedral(m.xyz, i, (i + 1) % 6, (i + 2) % 6, (i + 3) % 6) / DEG, 0.0, 4.0);
    parse("C", &m);
    embed(&m, 7, 0, "methane");
    for (int i = 1; i < 5; i++)
        for (int j = i + 1; j < 5; j++)
            assert_close(angle(m.xyz, i, 0, j) / DEG, 109.47, 4.0);
    parse("C#C", &m);
    embed(&m, 7, 0, "acetylene");
    assert_close(angle(m.xyz, 2, 0, 1) / DEG, 180.0, 4.0);
    parse("C1CC1", &m);
    embed(&m, 7, 0, "cyclopropane");
    assert_close(angle(m.xyz, 0, 1, 2) / DEG, 60.0, 4.0);
    parse("C=C", &m);
    embed(&m, 7, 0, "ethylene");
    double p = fabs(dihedral(m.xyz, 2, 0, 1, 4)) / DEG; /* H-C=C-H: 0 or 180 */
    assert_true(p < 4.0 || p > 176.0);
    assert_close(angle(m.xyz, 2, 0, 3) / DEG, 120.0, 4.0);
    nd_molecule_free(&m);
}

/* ---------------------------------------------------------------- CIP */

/* A small CIP ranking (R. S. Cahn, C. K. Ingold, V. Prelog, Angew. Chem.
 * Int. Ed. 5, 385, 1966; V. Prelog and G. Helmchen, ibid. 21, 567, 1982):
 * the hierarchical digraph from the centre, multiple bonds by duplicate
 * atoms (which carry only phantom substituents), compared sphere by sphere
 * by atomic number (rule 1a), branches explored in order of their own
 * rank. Enough for the molecules below; not a general implementation. */
typedef struct {
    int atom, from, dup;
} cip_node;

/* Children of a node: the neighbours except where it came from, plus one
 * duplicate per extra bond order (also towards the parent). */
static int cip_children(const nd_molecule *m, cip_node p, cip_node *out)
{
    if (p.dup)
        return 0;
    int k = 0;
    for (int b = 0; b < m->nbonds; b++) {
        int o = m->bonds[b].a == p.atom ? m->bonds[b].b : m->bonds[b].b == p.atom ? m->bonds[b].a : -1;
        if (o < 0)
            continue;
        if (o != p.from)
            out[k++] = (cip_node){o, p.atom, 0};
        for (int e = 1; e < m->bonds[b].order; e++)
            out[k++] = (cip_node){o, p.atom, 1};
    }
    return k;
}

static int cip_z(const nd_molecule *m, cip_node n)
{
    return m->z[n.atom];
}

/* Compares the branches a and b (nodes one sphere from the centre):
 * >0 if a ranks higher. Explores up to 8 spheres. */
static int cip_compare(const nd_molecule *m, cip_node a, cip_node b)
{
    if (cip_z(m, a) != cip_z(m, b))
        return cip_z(m, a) - cip_z(m, b);
    cip_node la[512], lb[512], na[512], nb[512];
    int ca = 1, cb = 1;
    la[0] = a;
    lb[0] = b;
    for (int sphere = 0; sphere < 8; sphere++) {
        int ka = 0, kb = 0;
        /* nodes of the current sphere are in rank order; compare their
         * child sets (sorted by Z, descending) one node at a time */
        int len = ca > cb ? ca : cb;
        for (int i = 0; i < len; i++) {
            cip_node cha[8], chb[8];
            int xa = i < ca ? cip_children(m, la[i], cha) : 0;
            int xb = i < cb ? cip_children(m, lb[i], chb) : 0;
            /* sort children by Z descending */
            for (int p = 1; p < xa; p++)
                for (int q = p; q > 0 && cip_z(m, cha[q - 1]) < cip_z(m, cha[q]); q--) {
                    cip_node t = cha[q]; cha[q] = cha[q - 1]; cha[q - 1] = t;
                }
            for (int p = 1; p < xb; p++)
                for (int q = p; q > 0 && cip_z(m, chb[q - 1]) < cip_z(m, chb[q]); q--) {
                    cip_node t = chb[q]; chb[q] = chb[q - 1]; chb[q - 1] = t;
                }
            int w = xa > xb ? xa : xb;
            for (int q = 0; q < w; q++) {
                int za = q < xa ? cip_z(m, cha[q]) : 0, zb = q < xb ? cip_z(m, chb[q]) : 0;
                if (za != zb)
                    return za - zb;
            }
            for (int q = 0; q < xa && ka < 512; q++)
                na[ka++] = cha[q];
            for (int q = 0; q < xb && kb < 512; q++)
                nb[kb++] = chb[q];
        }
        if (ka == 0 && kb == 0)
            return 0;
        memcpy(la, na, (size_t)ka * sizeof *la);
        memcpy(lb, nb, (size_t)kb * sizeof *lb);
        ca = ka;
        cb = kb;
    }
    return 0;
}

/* 'R' or 'S' for centre c of an embedded molecule, '?' when two
 * substituents tie. Looking with the lowest-ranked substituent away, 1-2-3
 * clockwise is R; with p4 away that is a negative V(p1, p2, p3). */
static char cip_label(const nd_molecule *m, int c)
{
    int nb[8];
    int k = neighbours(m, c, nb, 8);
    assert_int_equal(k, 4);
    cip_node s[4];
    for (int i = 0; i < 4; i++)
        s[i] = (cip_node){nb[i], c, 0};
    for (int p = 1; p < 4; p++)
        for (int q = p; q > 0 && cip_compare(m, s[q - 1], s[q]) < 0; q--) {
            cip_node t = s[q]; s[q] = s[q - 1]; s[q - 1] = t;
        }
    for (int p = 0; p < 3; p++)
        if (cip_compare(m, s[p], s[p + 1]) == 0)
            return '?';
    double v = signed_volume(m->xyz, c, s[0].atom, s[1].atom, s[2].atom);
    return v < 0 ? 'R' : 'S';
}

/* Textbook configurations. The L-amino acids have the (S) alpha carbon
 * except L-cysteine (R), where CH2SH outranks COOH; L-threonine is (2S,3R)
 * and L-isoleucine (2S,3S) (IUPAC-IUB Joint Commission on Biochemical
 * Nomenclature, "Nomenclature and symbolism for amino acids and peptides",
 * Eur. J. Biochem. 138, 9, 1984). D-glyceraldehyde is (R) and L-lactic
 * acid (S) (the Fischer reference configurations; IUPAC "Nomenclature of
 * carbohydrates" 1996, 2-Carb-4). The SMILES are ours, written from the
 * OpenSMILES rules and memory; the test checks reader, embedding and
 * labels together. */
static void test_textbook_configurations(void **state)
{
    (void)state;
    static const struct {
        const char *smi, *name;
        int centre;
        char label;
    } cases[] = {
        {"N[C@@H](C)C(=O)O", "L-alanine", 1, 'S'},
        {"N[C@@H](CC(C)C)C(=O)O", "L-leucine", 1, 'S'},
        {"N[C@@H](C(C)C)C(=O)O", "L-valine", 1, 'S'},
        {"N[C@@H](Cc1ccccc1)C(=O)O", "L-phenylalanine", 1, 'S'},
        {"N[C@@H](Cc1ccc(O)cc1)C(=O)O", "L-tyrosine", 1, 'S'},
        {"N[C@@H](Cc1c[nH]c2ccccc12)C(=O)O", "L-tryptophan", 1, 'S'},
        {"N[C@@H](CO)C(=O)O", "L-serine", 1, 'S'},
        {"N[C@@H](CS)C(=O)O", "L-cysteine", 1, 'R'},
        {"CSCC[C@H](N)C(=O)O", "L-methionine", 4, 'S'},
        {"N[C@@H](CC(=O)O)C(=O)O", "L-aspartic acid", 1, 'S'},
        {"N[C@@H](CCC(=O)O)C(=O)O", "L-glutamic acid", 1, 'S'},
        {"N[C@@H](CC(N)=O)C(=O)O", "L-asparagine", 1, 'S'},
        {"N[C@@H](CCC(N)=O)C(=O)O", "L-glutamine", 1, 'S'},
        {"NCCCC[C@H](N)C(=O)O", "L-lysine", 5, 'S'},
        {"N[C@@H](CCCNC(N)=N)C(=O)O", "L-arginine", 1, 'S'},
        {"N[C@@H](Cc1c[nH]cn1)C(=O)O", "L-histidine", 1, 'S'},
        {"OC(=O)[C@@H]1CCCN1", "L-proline", 3, 'S'},
        {"C[C@@H](O)[C@H](N)C(=O)O", "L-threonine C2", 3, 'S'},
        {"C[C@@H](O)[C@H](N)C(=O)O", "L-threonine C3", 1, 'R'},
        {"CC[C@H](C)[C@H](N)C(=O)O", "L-isoleucine C2", 4, 'S'},
        {"CC[C@H](C)[C@H](N)C(=O)O", "L-isoleucine C3", 2, 'S'},
        {"C([C@H](C=O)O)O", "D-glyceraldehyde", 1, 'R'},
        {"C[C@H](O)C(=O)O", "L-lactic acid", 1, 'S'},
        {"N[C@H](C)C(=O)O", "D-alanine", 1, 'R'},
    };
    for (size_t k = 0; k < sizeof cases / sizeof cases[0]; k++) {
        nd_molecule m;
        nd_molecule_init(&m);
        parse(cases[k].smi, &m);
        embed(&m, 11, 0, cases[k].name);
        char got = cip_label(&m, cases[k].centre);
        if (got != cases[k].label)
            fail_msg("%s (%s): atom %d is %c, textbook %c", cases[k].name, cases[k].smi,
                     cases[k].centre + 1, got, cases[k].label);
        nd_molecule_free(&m);
    }
}

/* E/Z by the dihedral of the carboxyl carbons: fumaric acid is
 * (E)-butenedioic acid, maleic acid (Z) (IUPAC names; textbook, from
 * memory). */
static void test_fumaric_maleic(void **state)
{
    (void)state;
    nd_molecule m;
    nd_molecule_init(&m);
    parse("OC(=O)/C=C/C(=O)O", &m);
    embed(&m, 3, 0, "fumaric acid");
    assert_true(fabs(dihedral(m.xyz, 1, 3, 4, 5)) / DEG > 170.0);
    parse("OC(=O)/C=C\\C(=O)O", &m);
    embed(&m, 3, 0, "maleic acid");
    assert_true(fabs(dihedral(m.xyz, 1, 3, 4, 5)) / DEG < 10.0);
    nd_molecule_free(&m);
}

/* Enantiomers come out mirror images: the signed volumes at the centre are
 * opposite, and the mirrored D structure passes the check as the L
 * molecule (same atom order). */
static void test_enantiomers(void **state)
{
    (void)state;
    nd_molecule l, d;
    nd_molecule_init(&l);
    nd_molecule_init(&d);
    parse("N[C@@H](C)C(=O)O", &l);
    parse("N[C@H](C)C(=O)O", &d);
    embed(&l, 5, 0, "L-Ala");
    embed(&d, 5, 0, "D-Ala");
    double vl = signed_volume(l.xyz, 1, 0, 2, 3), vd = signed_volume(d.xyz, 1, 0, 2, 3);
    assert_true(vl * vd < 0);
    for (int i = 0; i < d.natoms; i++)
        d.xyz[3 * i] = -d.xyz[3 * i];
    nd_embed_report rep;
    assert_int_equal(nd_embed_check(&l, d.xyz, &rep, NULL), ND_OK);
    assert_int_equal(rep.chirality_wrong, 0);
    assert_int_equal(nd_embed_check(&l, l.xyz, &rep, NULL), ND_OK);
    assert_int_equal(rep.chirality_wrong, 0);
    /* the unmirrored D structure is wrong for L */
    for (int i = 0; i < d.natoms; i++)
        d.xyz[3 * i] = -d.xyz[3 * i];
    assert_int_equal(nd_embed_check(&l, d.xyz, &rep, NULL), ND_OK);
    assert_int_equal(rep.chirality_wrong, 1);
    nd_molecule_free(&l);
    nd_molecule_free(&d);
}

/* Same seed and index: the same bits; another index: another structure
 * (decane is flexible, so two starts differ). */
static void test_determinism(void **state)
{
    (void)state;
    nd_molecule m;
    nd_molecule_init(&m);
    parse("CCCCCCCCCC", &m);
    int n = m.natoms;
    double *a = malloc((size_t)(3 * n) * sizeof *a), *b = malloc((size_t)(3 * n) * sizeof *b);
    double *c = malloc((size_t)(3 * n) * sizeof *c);
    assert_int_equal(nd_embed(&m, 99, 0, NULL, a, NULL), ND_OK);
    assert_int_equal(nd_embed(&m, 99, 0, NULL, b, NULL), ND_OK);
    assert_memory_equal(a, b, (size_t)(3 * n) * sizeof *a);
    assert_int_equal(nd_embed(&m, 99, 1, NULL, c, NULL), ND_OK);
    /* compare the internal geometry: end-to-end C1..C10 distance */
    double d0 = dist(a, 0, 9), d1 = dist(c, 0, 9);
    int differs = fabs(d0 - d1) > 1e-3;
    for (int i = 0; i < 10 && !differs; i++)
        for (int j = i + 1; j < 10; j++)
            if (fabs(dist(a, i, j) - dist(c, i, j)) > 1e-3)
                differs = 1;
    assert_true(differs);
    free(a);
    free(b);
    free(c);
    nd_molecule_free(&m);
}

/* Disconnected parts are placed apart; one atom sits at the origin. */
static void test_parts(void **state)
{
    (void)state;
    nd_molecule m;
    nd_molecule_init(&m);
    parse("[Na+].[Cl-]", &m);
    embed(&m, 1, 0, "NaCl");
    assert_true(dist(m.xyz, 0, 1) > 3.0);
    parse("[Cl-]", &m);
    embed(&m, 1, 0, "chloride");
    assert_close(m.xyz[0], 0.0, 0.0);
    parse("CCO.CCO.O", &m);
    embed(&m, 1, 0, "ethanol water");
    corpus_stats st = {0, 0, 0, 0, 0, 0.0, 1e9};
    check_structure(&m, "ethanol water", &st);
    nd_molecule_free(&m);
}

static void test_errors(void **state)
{
    (void)state;
    nd_molecule m;
    nd_molecule_init(&m);
    nd_error err;
    double x[6];
    assert_int_equal(nd_embed(&m, 1, 0, NULL, x, &err), ND_EINPUT);
    nd_molecule_add_atom(&m, 6, 0, 0, 0, NULL);
    nd_molecule_add_atom(&m, 6, 0, 0, 0, NULL);
    nd_molecule_add_bond(&m, 0, 1, ND_BOND_AROMATIC, NULL);
    assert_int_equal(nd_embed(&m, 1, 0, NULL, x, &err), ND_EINPUT);
    assert_contains(err.msg, "aromatic");
    assert_int_equal(nd_embed(NULL, 1, 0, NULL, x, &err), ND_EINVAL);
    nd_molecule_free(&m);
    /* no bond table at all */
    nd_molecule_init(&m);
    nd_molecule_add_atom(&m, 6, 0, 0, 0, NULL);
    nd_molecule_add_atom(&m, 8, 0, 0, 0, NULL);
    assert_int_equal(nd_embed(&m, 1, 0, NULL, x, &err), ND_EINPUT);
    assert_contains(err.msg, "bond table");
    nd_molecule_free(&m);
}

/* A large molecule: an oligoglycine of 137 heavy atoms (under the
 * sanitizers 49). */
static void test_large(void **state)
{
    (void)state;
    int reps = nd_test_sanitized() ? 12 : 34;
    char smi[1024] = "";
    for (int k = 0; k < reps; k++)
        strcat(smi, "NCC(=O)");
    strcat(smi, "O");
    nd_molecule m;
    nd_molecule_init(&m);
    parse(smi, &m);
    assert_true(m.natoms - count_h(&m) >= (nd_test_sanitized() ? 49 : 137));
    embed(&m, 17, 0, "oligoglycine");
    corpus_stats st = {0, 0, 0, 0, 0, 0.0, 1e9};
    check_structure(&m, "oligoglycine", &st);
    nd_molecule_free(&m);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_bond_model),       cmocka_unit_test(test_angles),
        cmocka_unit_test(test_textbook_configurations), cmocka_unit_test(test_fumaric_maleic),
        cmocka_unit_test(test_enantiomers),      cmocka_unit_test(test_determinism),
        cmocka_unit_test(test_parts),            cmocka_unit_test(test_errors),
        cmocka_unit_test(test_large),            cmocka_unit_test(test_corpus),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
