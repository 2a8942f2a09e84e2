/* What the conformer search can change in a molecule, and the moves that
 * change it: rotors (rotatable bonds with the torsion values tried for each
 * kind), flips of saturated 5- to 7-membered rings, pyramidal inversion of
 * sp3 nitrogen, and the clash screen applied before any relaxation.
 * Moves act on coordinate arrays and never change the bond graph or any
 * stereocentre (see each move). */
#ifndef ND_SAMPLE_H
#define ND_SAMPLE_H

#include "conformers/topology.h"
#include "core/molecule.h"

#define ND_ROTOR_MAX_VALUES 12

/* Kinds of rotor, by the hybridisation of the bond's two atoms. */
typedef enum nd_rotor_kind {
    ND_ROTOR_SP3_SP3 = 0, /* three staggered values: 60, 180, 300 degrees */
    ND_ROTOR_SP2_SP3 = 1, /* six values, every 60 degrees from 0 (eclipsed and bisected forms of
                             a planar group against a tetrahedral one) */
    ND_ROTOR_PLANAR = 2,  /* partial double bond of an amide, ester, thioamide, carbamate or
                             similar (C(=O|S|N)-N|O|S): its two planar forms, 0 and 180 */
    ND_ROTOR_CONJ = 3     /* other bonds between planar centres (biaryls, dienes): six values */
} nd_rotor_kind;

/* One rotor: torsion a-b-c-d about the bond b-c; the atoms on c's side
 * (the smaller side) move when the torsion is set. */
typedef struct nd_rotor {
    int bond;
    int a, b, c, d;       /* a: lowest-index heavy neighbour of b other than c (d likewise) */
    nd_rotor_kind kind;
    int nvalues;
    double values[ND_ROTOR_MAX_VALUES]; /* torsion values a-b-c-d tried, degrees */
    int nmoving;
    const int *moving;    /* atoms on c's side, c included; owned by the sampler */
} nd_rotor;

/* Plain data for a flippable ring, owned by the sampler. */
typedef struct nd_ring_flip {
    int size;
    const int *atoms;     /* ring atoms in cyclic order */
} nd_ring_flip;

typedef struct nd_sampler nd_sampler;

/* Finds the rotors, flippable rings and invertible nitrogens of m with
 * topology t (both must outlive the sampler).
 *  - Rotors: nd_topology_rotatable_bonds, typed as above. PLANAR when one
 *    end is a carbon (or nitrogen) with a double bond to O, S or N outside
 *    this bond and the other end is N, O or S carrying only single bonds.
 *  - Ring flips: SSSR rings of 5 to 7 atoms, all sp3 and not flat, that
 *    share no atom with another ring path (each substituent of a ring
 *    atom leads away from the ring without coming back), and contain no
 *    three-coordinate atom with stated chirality.
 *  - Nitrogen inversion: sp3 nitrogen with three neighbours, no stated
 *    chirality, not in a three- or four-membered ring.
 * *out is freed with nd_sampler_free. ND_ENOMEM. */
int nd_sampler_new(const nd_molecule *m, const nd_topology *t, nd_sampler **out, nd_error *err);
void nd_sampler_free(nd_sampler *s);

int nd_sampler_rotors(const nd_sampler *s);
const nd_rotor *nd_sampler_rotor(const nd_sampler *s, int i);
int nd_sampler_flips(const nd_sampler *s);
const nd_ring_flip *nd_sampler_flip(const nd_sampler *s, int i);
int nd_sampler_inversions(const nd_sampler *s);
int nd_sampler_inversion_atom(const nd_sampler *s, int i);

/* Number of degrees of freedom sampled: rotors, then ring flips, then
 * inversions (each flip or inversion a two-state dimension). */
int nd_sampler_dimensions(const nd_sampler *s);
/* States of dimension k (nvalues for a rotor, 2 for a flip or inversion). */
int nd_sampler_states(const nd_sampler *s, int k);
/* Product of the states of all dimensions (as a double: it may be huge). */
double nd_sampler_combinations(const nd_sampler *s);

/* Torsion a-b-c-d at x, degrees, (-180, 180], IUPAC sign. */
double nd_sampler_dihedral(const double *x, int a, int b, int c, int d);

/* Sets rotor r's torsion at x to deg by turning its moving atoms about the
 * bond axis. Only that rotor's torsion changes (every other rotor's four
 * atoms move rigidly or lie on the axis), so rotors can be set in any
 * order. */
void nd_sampler_set_torsion(const nd_sampler *s, int r, double deg, double *x);

/* Flips ring i at x: every ring atom is reflected through the ring's mean
 * plane (normal of D. Cremer and J. A. Pople, J. Am. Chem. Soc. 97, 1354,
 * 1975), so a chair becomes the inverted chair; the substituents of each
 * ring atom are moved as rigid groups, the two of a four-coordinate atom
 * swapping their mirrored directions, so axial and equatorial exchange while
 * every stereocentre keeps its sign (mirror plus swap of two ligands). */
void nd_sampler_flip_ring(const nd_sampler *s, int i, double *x);

/* Inverts nitrogen i at x: the nitrogen is reflected through the plane of
 * its three neighbours; the neighbours stay. */
void nd_sampler_invert(const nd_sampler *s, int i, double *x);

/* Applies state st of dimension k at x (a rotor value; for a flip or
 * inversion, state 1 applies the move and state 0 does nothing). */
void nd_sampler_apply(const nd_sampler *s, int k, int st, double *x);

/* Clash screen: returns 1 if two atoms three or more bonds apart are closer
 * than ratio times the sum of their van der Waals radii (Bondi, as
 * nd_embed_vdw_radius), else 0. *pa, *pb (may be NULL) get the pair. */
int nd_sampler_clash(const nd_sampler *s, const double *x, double ratio, int *pa, int *pb);

#endif
