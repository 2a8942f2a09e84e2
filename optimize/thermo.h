/* Ideal-gas thermochemistry of one structure from its harmonic frequencies:
 * rigid rotor, harmonic oscillator (RRHO), optionally the quasi-RRHO
 * entropy of low-frequency modes (S. Grimme, Chem. Eur. J. 18, 9955, 2012).
 *
 * Units: energies kcal/mol; entropies and heat capacities cal/(mol K)
 * (so T S in kcal/mol is T * s / 1000). Standard statistical mechanics of
 * the ideal gas (e.g. D. A. McQuarrie, "Statistical Mechanics", 1976,
 * chapters 5 and 8): translational entropy by the Sackur-Tetrode equation,
 * classical rigid rotor with rotational symmetry number, harmonic
 * oscillators counted from the bottom of the well (so E and H include the
 * zero-point energy), electronic degeneracy from the spin multiplicity. */
#ifndef ND_THERMO_H
#define ND_THERMO_H

#include "core/status.h"

#define ND_THERMO_T_DEFAULT 298.15  /* K */
#define ND_THERMO_P_DEFAULT 1.0e5   /* Pa: the IUPAC standard pressure, 1 bar */
/* Quasi-RRHO parameters of Grimme (2012): damping w = 1 / (1 + (w0/nu)^alpha)
 * with w0 = 100 cm^-1 and alpha = 4; average moment of inertia Bav = 1e-44
 * kg m^2 limiting the free-rotor moment of very soft modes. */
#define ND_THERMO_QH_W0 100.0
#define ND_THERMO_QH_ALPHA 4.0
#define ND_THERMO_QH_BAV 1.0e-44

typedef struct nd_thermo_opts {
    double temperature;   /* K; 0 = ND_THERMO_T_DEFAULT */
    double pressure;      /* Pa; 0 = ND_THERMO_P_DEFAULT */
    int symmetry;         /* rotational symmetry number; 0 = detect (symmetry.h) */
    double symmetry_tol;  /* angstrom, for detection; 0 = ND_SYMMETRY_TOL */
    int multiplicity;     /* spin multiplicity (electronic degeneracy); 0 = 1 */
    int quasi;            /* 1: quasi-RRHO entropy for low-frequency modes */
    double qh_w0;         /* cm^-1; 0 = ND_THERMO_QH_W0 */
    double qh_alpha;      /* 0 = ND_THERMO_QH_ALPHA */
    double qh_bav;        /* kg m^2; 0 = ND_THERMO_QH_BAV */
} nd_thermo_opts;

typedef struct nd_thermo {
    double temperature, pressure; /* K, Pa */
    int sigma;                    /* symmetry number used */
    int sigma_detected;           /* 1 if sigma came from nd_symmetry_find */
    int linear;                   /* 1 if treated as a linear rotor */
    int nvib;                     /* real frequencies used */
    int nimag_skipped;            /* imaginary (negative) frequencies left out */
    double mass;                  /* amu */
    double rot_temp[3];           /* rotational temperatures, K (linear: one, in [0]) */
    double zpe;                   /* zero-point energy, kcal/mol */
    double e_trans, e_rot, e_vib; /* thermal energies, kcal/mol (e_vib includes the ZPE) */
    double e_total;               /* E = e_trans + e_rot + e_vib, kcal/mol (from the bottom of the well) */
    double h_total;               /* H = E + RT, kcal/mol */
    double s_trans, s_rot, s_vib, s_elec; /* cal/(mol K); s_vib quasi-RRHO when asked */
    double s_total;               /* cal/(mol K) */
    double cv_trans, cv_rot, cv_vib, cv_total; /* cal/(mol K) */
    double cp_total;              /* Cv + R, cal/(mol K) */
    double g_total;               /* G = H - T S, kcal/mol (correction to add to the energy) */
} nd_thermo;

/* Thermochemistry of n atoms (z, masses in amu, coordinates x 3n in
 * angstrom, for the moments of inertia and the symmetry number) with the
 * nfreq vibrational wavenumbers freq (cm^-1; negative = imaginary, left out
 * and counted). linear is 1 or 0 as found by the normal-mode analysis, or -1
 * to decide here (nd_modes_is_linear). z may be NULL when opts->symmetry is
 * given. One atom has only translational (and electronic) terms. opts may be
 * NULL for the defaults. Returns ND_OK, ND_EINVAL (bad temperature,
 * pressure or sizes), ND_EINPUT (bad mass) or ND_ENOMEM. */
int nd_thermo_compute(int n, const int *z, const double *mass, const double *x, int linear,
                      const double *freq, int nfreq, const nd_thermo_opts *opts, nd_thermo *out,
                      nd_error *err);

/* Vibrational entropy of one mode of wavenumber nu (cm^-1, > 0) at T, cal/(mol K):
 * harmonic, and the quasi-RRHO interpolation (Grimme 2012) with parameters
 * w0 (cm^-1), alpha, bav (kg m^2). Exposed for tests and reports. */
double nd_thermo_s_harmonic(double nu, double t);
double nd_thermo_s_free_rotor(double nu, double t, double bav);
double nd_thermo_s_quasi(double nu, double t, double w0, double alpha, double bav);

#endif
