/* Physical constants and unit conversions: the only place they are defined.
 *
 * Source: CODATA 2018 recommended values (E. Tiesinga et al., Rev. Mod. Phys.
 * 93, 025010, 2021; NIST SP 961). Constants marked "exact" are exact in the
 * 2019 SI. The thermochemical calorie is 4.184 J exactly (NIST SP 811, B.8).
 *
 * Internal units of nadir: angstrom, kcal/mol, kcal/mol/angstrom, unified
 * atomic mass units (dalton), kelvin. Convert at boundaries only. */
#ifndef ND_UNITS_H
#define ND_UNITS_H

/* --- CODATA 2018 --- */
#define ND_AVOGADRO        6.02214076e23        /* mol^-1, exact */
#define ND_BOLTZMANN_J     1.380649e-23         /* J/K, exact */
#define ND_PLANCK_J        6.62607015e-34       /* J s, exact */
#define ND_LIGHT_SPEED     299792458.0          /* m/s, exact */
#define ND_ELEMENTARY_CHARGE 1.602176634e-19    /* C, exact */
#define ND_HARTREE_J       4.3597447222071e-18  /* J */
#define ND_BOHR_ANGSTROM   0.529177210903       /* angstrom */
#define ND_AMU_KG          1.66053906660e-27    /* kg (atomic mass constant) */
#define ND_CALORIE_J       4.184                /* J, thermochemical calorie, exact */

/* --- derived (computed from the above, not rounded by hand) --- */
#define ND_GAS_CONSTANT_J  (ND_AVOGADRO * ND_BOLTZMANN_J)               /* J/(mol K) */
#define ND_HARTREE_KCALMOL (ND_HARTREE_J * ND_AVOGADRO / (1000.0 * ND_CALORIE_J))
#define ND_EV_KCALMOL      (ND_ELEMENTARY_CHARGE * ND_AVOGADRO / (1000.0 * ND_CALORIE_J))
#define ND_KJMOL_KCALMOL   (1.0 / ND_CALORIE_J)
#define ND_BOLTZMANN_KCALMOL (ND_GAS_CONSTANT_J / (1000.0 * ND_CALORIE_J)) /* kcal/(mol K) */
/* Energy of one wavenumber (1 cm^-1) per mole: h c (100 cm/m) N_A. */
#define ND_WAVENUMBER_KCALMOL (ND_PLANCK_J * ND_LIGHT_SPEED * 100.0 * ND_AVOGADRO / (1000.0 * ND_CALORIE_J))
/* Hartree/bohr to kcal/mol/angstrom (gradients). */
#define ND_HARTREE_BOHR_KCALMOL_ANGSTROM (ND_HARTREE_KCALMOL / ND_BOHR_ANGSTROM)
#define ND_EV_ANGSTROM_KCALMOL_ANGSTROM  ND_EV_KCALMOL

/* Frequency of a harmonic mode from an eigenvalue of the mass-weighted
 * Hessian in kcal/mol/angstrom^2/amu: nu (cm^-1) = sqrt(lambda * K) / (2 pi c),
 * where K converts kcal/mol/angstrom^2/amu to s^-2. */
#define ND_KCALMOL_A2_AMU_TO_S2 (1000.0 * ND_CALORIE_J / ND_AVOGADRO / 1e-20 / ND_AMU_KG)

#endif
