/* Ideal-gas RRHO thermochemistry (see thermo.h). */
#include "optimize/thermo.h"

#include "core/units.h"
#include "optimize/modes.h"
#include "optimize/symmetry.h"

#include <math.h>
#include <string.h>

#define R_CAL (ND_GAS_CONSTANT_J / ND_CALORIE_J)                        /* cal/(mol K) */
#define R_KCAL (R_CAL / 1000.0)                                          /* kcal/(mol K) */
#define C2_CM_K (ND_PLANCK_J * ND_LIGHT_SPEED * 100.0 / ND_BOLTZMANN_J) /* hc/k, cm K */
#define AMU_A2_TO_KG_M2 (ND_AMU_KG * 1e-20)

/* Harmonic-oscillator entropy of one mode: S/R = u/(e^u - 1) - ln(1 - e^-u),
 * u = hc nu / kT. */
double nd_thermo_s_harmonic(double nu, double t)
{
    double u = C2_CM_K * nu / t;
    return R_CAL * (u / expm1(u) - log(-expm1(-u)));
}

/* Free-rotor entropy of Grimme (2012): a mode of wavenumber nu is treated as
 * a rotor of moment mu = h / (8 pi^2 nu_s) (nu_s in s^-1), reduced by the
 * average molecular moment Bav to mu' = mu Bav / (mu + Bav), with
 * S/R = 1/2 + ln[(8 pi^3 mu' k T / h^2)^(1/2)]. */
double nd_thermo_s_free_rotor(double nu, double t, double bav)
{
    double nus = nu * ND_LIGHT_SPEED * 100.0;
    double mu = ND_PLANCK_J / (8.0 * M_PI * M_PI * nus);
    double mup = mu * bav / (mu + bav);
    double arg = 8.0 * M_PI * M_PI * M_PI * mup * ND_BOLTZMANN_J * t / (ND_PLANCK_J * ND_PLANCK_J);
    return R_CAL * (0.5 + 0.5 * log(arg));
}

/* Quasi-RRHO entropy (Grimme 2012): w S_harmonic + (1 - w) S_free_rotor with
 * the damping function w = 1 / (1 + (w0 / nu)^alpha). */
double nd_thermo_s_quasi(double nu, double t, double w0, double alpha, double bav)
{
    double w = 1.0 / (1.0 + pow(w0 / nu, alpha));
    return w * nd_thermo_s_harmonic(nu, t) + (1.0 - w) * nd_thermo_s_free_rotor(nu, t, bav);
}

int nd_thermo_compute(int n, const int *z, const double *mass, const double *x, int linear,
                      const double *freq, int nfreq, const nd_thermo_opts *opts, nd_thermo *out,
                      nd_error *err)
{
    if (!out)
        return nd_fail(err, ND_EINVAL, "thermo: no output");
    memset(out, 0, sizeof *out);
    if (n <= 0 || !mass || !x || nfreq < 0 || (nfreq > 0 && !freq))
        return nd_fail(err, ND_EINVAL, "thermo: no atoms, masses, coordinates or frequencies");
    double t = (opts && opts->temperature != 0) ? opts->temperature : ND_THERMO_T_DEFAULT;
    double p = (opts && opts->pressure != 0) ? opts->pressure : ND_THERMO_P_DEFAULT;
    if (!(t > 0) || !isfinite(t))
        return nd_fail(err, ND_EINVAL, "thermo: temperature %g K must be positive", t);
    if (!(p > 0) || !isfinite(p))
        return nd_fail(err, ND_EINVAL, "thermo: pressure %g Pa must be positive", p);
    int mult = (opts && opts->multiplicity > 0) ? opts->multiplicity : 1;
    double w0 = (opts && opts->qh_w0 > 0) ? opts->qh_w0 : ND_THERMO_QH_W0;
    double alpha = (opts && opts->qh_alpha > 0) ? opts->qh_alpha : ND_THERMO_QH_ALPHA;
    double bav = (opts && opts->qh_bav > 0) ? opts->qh_bav : ND_THERMO_QH_BAV;
    double mt = 0;
    for (int i = 0; i < n; i++) {
        if (!(mass[i] > 0) || !isfinite(mass[i]))
            return nd_fail(err, ND_EINPUT, "thermo: atom %d has mass %g", i + 1, mass[i]);
        mt += mass[i];
    }
    out->temperature = t;
    out->pressure = p;
    out->mass = mt;
    double rt = R_KCAL * t;

    /* translation: Sackur-Tetrode */
    double m = mt * ND_AMU_KG, kt = ND_BOLTZMANN_J * t;
    double lam3 = pow(2.0 * M_PI * m * kt / (ND_PLANCK_J * ND_PLANCK_J), 1.5);
    out->s_trans = R_CAL * (log(lam3 * kt / p) + 2.5);
    out->e_trans = 1.5 * rt;
    out->cv_trans = 1.5 * R_CAL;

    /* rotation */
    out->sigma = 1;
    if (n > 1) {
        if (linear < 0)
            linear = nd_modes_is_linear(n, mass, x, ND_MODES_LINEAR_TOL);
        out->linear = linear;
        if (opts && opts->symmetry > 0) {
            out->sigma = opts->symmetry;
        } else {
            if (!z)
                return nd_fail(err, ND_EINVAL, "thermo: elements needed to detect the symmetry number");
            nd_symmetry sym;
            int s = nd_symmetry_find(n, z, mass, x, opts ? opts->symmetry_tol : 0, &sym, err);
            if (s != ND_OK)
                return s;
            out->sigma = sym.sigma;
            out->sigma_detected = 1;
        }
        double mom[3];
        int s = nd_modes_inertia(n, mass, x, mom, NULL, err);
        if (s != ND_OK)
            return s;
        double th[3];
        for (int k = 0; k < 3; k++)
            th[k] = mom[k] > 0 ? ND_PLANCK_J * ND_PLANCK_J /
                                     (8.0 * M_PI * M_PI * mom[k] * AMU_A2_TO_KG_M2 * ND_BOLTZMANN_J)
                               : 0;
        if (linear) {
            /* one moment: the mean of the two equal ones (they differ only
             * by the tolerance of a nearly linear structure) */
            double ilin = 0.5 * (mom[1] + mom[2]) * AMU_A2_TO_KG_M2;
            double thl = ND_PLANCK_J * ND_PLANCK_J / (8.0 * M_PI * M_PI * ilin * ND_BOLTZMANN_J);
            out->rot_temp[0] = thl;
            out->s_rot = R_CAL * (log(t / (out->sigma * thl)) + 1.0);
            out->e_rot = rt;
            out->cv_rot = R_CAL;
        } else {
            if (!(th[0] > 0))
                return nd_fail(err, ND_EINPUT, "thermo: zero moment of inertia of a non-linear structure");
            memcpy(out->rot_temp, th, sizeof th);
            double q = sqrt(M_PI) / out->sigma * sqrt(t * t * t / (th[0] * th[1] * th[2]));
            out->s_rot = R_CAL * (log(q) + 1.5);
            out->e_rot = 1.5 * rt;
            out->cv_rot = 1.5 * R_CAL;
        }
    }

    /* vibration: harmonic oscillators from the bottom of the well */
    for (int k = 0; k < nfreq; k++) {
        double nu = freq[k];
        if (!isfinite(nu))
            return nd_fail(err, ND_EINPUT, "thermo: frequency %d is not finite", k + 1);
        if (!(nu > 0)) {
            out->nimag_skipped += nu < 0;
            continue;
        }
        double th = C2_CM_K * nu, u = th / t, em1 = expm1(u);
        out->nvib++;
        out->zpe += R_KCAL * th * 0.5;
        out->e_vib += R_KCAL * th * (0.5 + 1.0 / em1);
        out->cv_vib += R_CAL * u * u * (em1 + 1.0) / (em1 * em1);
        out->s_vib += (opts && opts->quasi) ? nd_thermo_s_quasi(nu, t, w0, alpha, bav)
                                            : nd_thermo_s_harmonic(nu, t);
    }
    out->s_elec = R_CAL * log((double)mult);
    out->e_total = out->e_trans + out->e_rot + out->e_vib;
    out->h_total = out->e_total + rt;
    out->s_total = out->s_trans + out->s_rot + out->s_vib + out->s_elec;
    out->cv_total = out->cv_trans + out->cv_rot + out->cv_vib;
    out->cp_total = out->cv_total + R_CAL;
    out->g_total = out->h_total - t * out->s_total / 1000.0;
    return ND_OK;
}
