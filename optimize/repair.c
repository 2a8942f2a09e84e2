/* Imaginary-mode repair (see repair.h). */
#include "optimize/repair.h"

#include "optimize/restrain.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

/* Displacement s for a mode of force constant k (kcal/mol/angstrom^2 along
 * the unit Cartesian vector): max(step, 10 tol / |k|) clipped to step_max. */
static double mode_step(double k, double tol, double step, double step_max)
{
    double s = step;
    if (tol > 0 && fabs(k) > 0 && 10.0 * tol / fabs(k) > s)
        s = 10.0 * tol / fabs(k);
    return s < step_max ? s : step_max;
}

int nd_repair_run(const nd_energy *pot, nd_molecule *mol, const int *frozen,
                  const nd_repair_opts *opts, nd_modes *modes, nd_check *check,
                  nd_repair_result *res, nd_error *err)
{
    if (!pot || !pot->fn || !mol || mol->natoms <= 0)
        return nd_fail(err, ND_EINVAL, "repair: missing potential or molecule");
    int n = mol->natoms;
    int rounds_max = (opts && opts->max_rounds > 0) ? opts->max_rounds : ND_REPAIR_ROUNDS;
    int modes_max = (opts && opts->max_modes > 0) ? opts->max_modes : ND_REPAIR_MAX_MODES;
    double step = (opts && opts->step > 0) ? opts->step : ND_REPAIR_STEP;
    double step_max = (opts && opts->step_max > 0) ? opts->step_max : ND_REPAIR_STEP_MAX;
    if (step_max < step)
        step_max = step;
    const nd_minimizer_type *method = (opts && opts->method) ? opts->method : NULL;
    nd_minimize_options mopt;
    if (opts && opts->min) {
        mopt = *opts->min;
    } else {
        nd_minimize_options_default(&mopt);
        nd_converge_preset_modes(&mopt.stop);
    }
    const nd_hessian_opts *hopt = opts ? opts->hessian : NULL;
    const nd_modes_opts *mdopt = opts ? opts->modes : NULL;
    const nd_check_opts *copt = opts ? opts->check : NULL;

    nd_repair_result r;
    memset(&r, 0, sizeof r);
    nd_modes m;
    nd_check c;
    memset(&m, 0, sizeof m);
    size_t nc = 3 * (size_t)n;
    double *g = malloc(sizeof(double) * nc);
    double *best = malloc(sizeof(double) * nc);
    double *trial = malloc(sizeof(double) * nc);
    nd_restraints *rs = NULL;
    nd_energy mpot = *pot; /* the potential the minimiser sees (frozen atoms held) */
    int status = ND_OK;
    if (!g || !best || !trial) {
        status = nd_fail(err, ND_ENOMEM, "repair: out of memory for %d atoms", n);
        goto done;
    }
    if (frozen && nd_hessian_count_free(n, frozen) < n) {
        status = nd_restraints_new(&rs, pot, n, err);
        for (int i = 0; i < n && status == ND_OK; i++)
            if (frozen[i])
                status = nd_restraints_freeze(rs, i, err);
        if (status != ND_OK)
            goto done;
        mpot = nd_restraints_energy(rs);
    }
    double e0;
    status = pot->fn(pot->ctx, n, mol->xyz, &e0, NULL);
    if (status != ND_OK) {
        status = nd_fail(err, status, "repair: the potential failed at the start structure");
        goto done;
    }
    r.energy_start = r.energy_end = e0;

    for (int round = 0;; round++) {
        nd_modes_free(&m);
        status = nd_modes_analyse(pot, mol, frozen, hopt, mdopt, copt, &m, &c, g, err);
        r.hessians++;
        if (status != ND_OK)
            goto done;
        if (round == 0) {
            r.nimag_start = c.nimag;
            r.lowest_start = c.lowest;
        }
        r.nimag_end = c.nimag;
        if (c.verdict == ND_VERDICT_MINIMUM || round == rounds_max)
            break;
        r.rounds++;
        /* the real imaginary modes, most negative first (modes are ascending) */
        double ebest = INFINITY;
        int tried = 0;
        for (int k = 0; k < m.nmodes && tried < modes_max; k++) {
            if (!nd_modes_is_imaginary(m.freq[k], c.grad_rms, copt))
                continue; /* not negative, or dismissed as noise by the check */
            tried++;
            double s = mode_step(m.k_kcal[k], mopt.stop.max_force, step, step_max);
            for (int sign = 1; sign >= -1; sign -= 2) {
                memcpy(trial, mol->xyz, sizeof(double) * nc);
                const double *v = m.vec + (size_t)k * 3 * m.natoms;
                for (int f = 0; f < m.natoms; f++)
                    for (int q = 0; q < 3; q++)
                        trial[3 * m.atoms[f] + q] += sign * s * v[3 * f + q];
                nd_minimize_result mr;
                int ms = nd_minimize(method, &mpot, n, trial, &mopt, &mr, err);
                r.trials++;
                r.force_calls += mr.force_calls;
                if (ms == ND_CONTINUE) {
                    r.unconverged++; /* counted, not an error: the lowest point is kept */
                    nd_error_clear(err);
                } else if (ms != ND_OK) {
                    status = ms;
                    nd_error_prefix(err, "repair, round %d, mode %d", round + 1, k + 1);
                    goto done;
                }
                if (mr.energy < ebest) {
                    ebest = mr.energy;
                    memcpy(best, trial, sizeof(double) * nc);
                }
            }
        }
        if (tried == 0)
            break; /* nothing left that the check counts (cannot happen with a saddle verdict) */
        memcpy(mol->xyz, best, sizeof(double) * nc);
        r.energy_end = ebest;
    }
    if (rs) {
        /* report the energy of the potential itself, without restraints (none are added) */
        double e;
        if (pot->fn(pot->ctx, n, mol->xyz, &e, NULL) == ND_OK)
            r.energy_end = e;
    }
    r.repaired = (c.verdict == ND_VERDICT_MINIMUM);
    if (check)
        *check = c;
    if (modes) {
        *modes = m;
        memset(&m, 0, sizeof m);
    }
done:
    nd_modes_free(&m);
    nd_restraints_free(rs);
    free(g);
    free(best);
    free(trial);
    if (res)
        *res = r;
    return status;
}
