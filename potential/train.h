/* Training learned potentials from reference energies and forces.
 *
 * The trainer follows the recipe of POTENTIAL.md:
 *  - the dataset is split by molecule key (seeded), so no molecule is in
 *    both the training and the validation set;
 *  - element energy offsets come from linear least squares on the training
 *    energies (LAPACKE dgelsd: E_s ~ sum_e n_se e0_e, minimum-norm when the
 *    compositions are collinear), and every descriptor feature is
 *    standardised per element (mean and standard deviation over the
 *    training atoms), before the networks see any data;
 *  - the loss of a minibatch B of structures is
 *      L = (1/|B|) sum_s w_s (E_s - E_s^ref)^2 / n_s
 *        + lambda_F (1/C) sum_{s, k} |F_sk - F_sk^ref|^2    (C: force components in B)
 *      + (weight_decay / 2) |theta|^2,
 *    in kcal/mol and angstrom, where w_s = 1 unless an energy window W is
 *    set (see nd_train_energy_weights); its gradient in the weights is exact, the
 *    force term by forward-mode tangents (potential/net_tangent.h,
 *    potential/descriptor.h: nd_descriptor_atom_tangent);
 *  - with a molecule offset A > 0, E_s - E_s^ref in the energy term is less
 *    A times the member's mean error over the training structures of s's
 *    molecule (weighted like the loss, found before each of the member's
 *    epochs and held through it): at A = 1 only energies relative within
 *    a molecule are fitted, which is what ranking conformers needs, and the
 *    molecule's own level is left free; below 1 that level keeps weight
 *    (1 - A)^2;
 *  - Adam (D. P. Kingma and J. Ba, "Adam: a method for stochastic
 *    optimization", ICLR 2015; beta1 0.9, beta2 0.999, epsilon 1e-8 as
 *    there) per ensemble member, with its learning rate halved when the
 *    member's validation loss has not improved for lr_patience epochs, down
 *    to min_learning_rate;
 *  - each member keeps the weights of its best epoch by the validation
 *    relative-energy error (energies measured from each molecule's lowest
 *    reference structure), and stops early when that has not improved for
 *    stop_patience epochs, or when its learning rate is at the floor and the
 *    validation loss has stalled again;
 *  - K members start from different weights (nd_model_new) and see the
 *    training set in different orders.
 *
 * Shape (set-up, one epoch, state): nd_train_new prepares everything,
 * nd_train_epoch runs one epoch of every member still training and reports
 * its errors; the caller's loop prints and decides, saves a checkpoint with
 * nd_train_save_state, and finally takes the model with nd_train_model.
 * nd_train_load_state continues a run: with the same dataset and settings,
 * the result is bit for bit the one of an uninterrupted run.
 *
 * Determinism: minibatches are cut into chunks of a fixed number of
 * structures; each chunk's gradient goes to its own buffer and the buffers
 * are summed in chunk order. The result does not depend on the number of
 * threads (given a BLAS whose dgemm results do not depend on the calling
 * thread, which holds for single-threaded OpenBLAS calls). */
#ifndef ND_TRAIN_H
#define ND_TRAIN_H

#include "core/status.h"
#include "potential/dataset.h"
#include "potential/descriptor.h"
#include "potential/model.h"

#include <stddef.h>
#include <stdint.h>

/* Settings. nd_train_config_defaults fills our defaults (POTENTIAL.md's
 * starting recipe, common practice, no source). */
typedef struct nd_train_config {
    int nelements;                          /* requested elements; 0: those of the dataset */
    int z[ND_MODEL_SPEC_MAX_ELEMENTS];
    int nhidden;                            /* 2 */
    int hidden[ND_MODEL_SPEC_MAX_HIDDEN];   /* 96, 64 */
    int members;                            /* 4 */
    int epochs;                             /* at most this many epochs: 200 */
    int batch;                              /* structures per minibatch: 32 */
    double force_weight;                    /* lambda_F: 1 */
    double energy_window;                   /* W, kcal/mol: 0 (every energy weighs alike) */
    double molecule_offset;                 /* A in [0, 1]: 0 (absolute energies; see below) */
    double validation_fraction;             /* of the molecules: 0.1 (0: no validation) */
    double learning_rate;                   /* 1e-3 */
    double min_learning_rate;               /* 1e-5 */
    int lr_patience;                        /* epochs without better validation loss: 5 */
    int stop_patience;                      /* epochs without better relative error: 25 */
    double weight_decay;                    /* 1e-6 */
    uint64_t seed;                          /* 1 */
    int neutral_only;                       /* 1: refuse charged structures */
    nd_descriptor_params descriptor;        /* nd_descriptor_defaults */
    /* 1: descriptor was chosen. With a warm start it must then extend the
     * start model's (nd_model_widen): training starts from the start model
     * with the new features at zero weight. */
    int descriptor_given;
    /* Warm start: NULL, or a model (the caller's; nd_train_new copies it) whose
     * weights, element offsets and feature scaling training starts from; its
     * elements, descriptor (unless descriptor_given), layers, members and
     * charge rule replace the ones above, and the dataset must lie within
     * its elements. Used to refine a model on new data (more structures, an
     * active-learning round) at a fraction of the cost of training from
     * random weights. */
    const struct nd_model *start;
    const char *start_name;                 /* its file, for the provenance; may be NULL */
    /* Molecule keys that always go to the training side of the split (the
     * caller's strings, read only during nd_train_new; NULL or 0: none),
     * such as the small molecules of a basis set that teach environments
     * no other molecule has: held out by chance, their environments would
     * never be learned. The seeded split is drawn as without them and the
     * listed ones are then moved out of validation, so the other molecules
     * stay where they were. Keys not in the dataset are ignored
     * (nd_train_split reports how many matched). */
    const char *const *always_train;
    int always_train_count;
} nd_train_config;

void nd_train_config_defaults(nd_train_config *c);

/* Energy weights of the loss for an energy window W > 0 (kcal/mol): with
 * dE_s the reference energy of structure s above the lowest one of its
 * molecule (key), w_s = 1 for dE_s <= W and (W / dE_s)^2 beyond, then all
 * divided by their mean over the structures mask marks (the training set),
 * so the energy term keeps its overall size. Why: the datasets of
 * tools/make-dataset.sh hold mostly thermal displacements 20-80 kcal/mol
 * above the minimum, whose total energies would otherwise dominate the fit,
 * while conformer ranking needs the lowest few kcal/mol (weighting the
 * low-energy region is common practice, no source). W <= 0: all weights 1.
 * w has nd_dataset_count(d) entries; mask may be NULL (all structures).
 * Returns ND_OK or ND_ENOMEM. */
int nd_train_energy_weights(const nd_dataset *d, double window, const unsigned char *mask,
                            double *w);

/* Errors of a set of structures (kcal/mol, kcal/mol/angstrom); NaN where
 * there is nothing to measure (no forces, no molecule with two structures). */
typedef struct nd_train_errors {
    double loss;          /* the training loss without weight decay */
    double energy_mae;    /* per structure */
    double energy_rmse;
    double force_mae;     /* per component */
    double force_rmse;
    double relative_mae;  /* energies from each molecule's lowest reference structure (with an
                           * energy window, of the structures within it) */
} nd_train_errors;

/* What one epoch did. */
typedef struct nd_train_epoch_report {
    int epoch;              /* epochs done, 1-based */
    int max_epochs;
    nd_train_errors train;  /* over this epoch's minibatches, mean over the members trained */
    nd_train_errors valid;  /* ensemble mean prediction on the validation set */
    double learning_rate;   /* largest over the members still training */
    int members_training;   /* after this epoch */
} nd_train_epoch_report;

/* Sizes of the split (no molecule on both sides; with a positive fraction
 * at least one validation molecule when there are two or more, and always
 * at least one training molecule). */
typedef struct nd_train_split_info {
    long train_structures, valid_structures;
    int train_molecules, valid_molecules;
    int always_train_matched;   /* keys of cfg.always_train found in the dataset */
} nd_train_split_info;

typedef struct nd_train nd_train;

/* Prepares training on data (which must outlive the trainer). data_name
 * (the dataset's path, may be NULL) is recorded in the provenance and used
 * to name the line of a rejected structure. ND_EINPUT for a structure with
 * an element outside the requested list, a charge the model refuses,
 * missing or mismatched coordinates; for an empty training set; for
 * settings out of range. *out is freed with nd_train_free. */
int nd_train_new(nd_train **out, const nd_dataset *data, const char *data_name,
                 const nd_train_config *cfg, nd_error *err);

void nd_train_free(nd_train *t);

/* Runs one epoch. ND_CONTINUE when more epochs remain, ND_OK when the
 * training has finished (every member stopped, or the epoch limit); rep
 * (may be NULL) receives the epoch's figures. Calling it after the end
 * returns ND_OK without doing anything (rep->epoch is then 0). Reaching
 * the epoch limit changes nothing in the state, so a run resumed with a
 * larger limit continues exactly as one started with it. An error
 * (ND_ECOMPUTE for non-finite energies or forces, ND_ENOMEM) leaves the
 * state of the last completed epoch's checkpoint usable. */
int nd_train_epoch(nd_train *t, nd_train_epoch_report *rep, nd_error *err);

/* Epochs done so far. */
int nd_train_epochs_done(const nd_train *t);

/* Changes the epoch limit (for a resumed run that should go further; not
 * part of the settings a checkpoint must match). */
void nd_train_set_epochs(nd_train *t, int epochs);

/* Seconds of training the caller has measured, kept in the state so that a
 * resumed run reports the total. */
void nd_train_set_elapsed(nd_train *t, double seconds);
double nd_train_elapsed(const nd_train *t);

void nd_train_split(const nd_train *t, nd_train_split_info *info);

/* The dataset indices of the training and validation structures, in
 * dataset order (*n receives their number); owned by t. */
const long *nd_train_training_set(const nd_train *t, long *n);
const long *nd_train_validation_set(const nd_train *t, long *n);

/* Writes the whole state (weights, Adam moments, schedule, best weights)
 * to path atomically (temporary name, then rename). Our own format: the
 * line "nadir-training-state 1", one JSON line (settings, epoch, a
 * fingerprint of the data and settings), the binary state as little-endian
 * doubles, and an FNV-1a checksum line as in model files. */
int nd_train_save_state(const nd_train *t, const char *path, nd_error *err);

/* Restores a state saved by nd_train_save_state into t, which must have
 * been made from the same dataset and settings (ND_EINPUT naming what
 * differs otherwise; the epoch limit and thread count may differ). */
int nd_train_load_state(nd_train *t, const char *path, nd_error *err);

/* The trained model: each member's best weights so far (it may be called
 * at any time), with the provenance: dataset name and size, the largest
 * training structure ("training_sizes": atoms_max, heavy_atoms_max), units, split,
 * epochs, settings, the best epoch of each member and the validation
 * errors of the ensemble mean with these weights. *out is freed with
 * nd_model_free. */
int nd_train_model(const nd_train *t, nd_model **out, nd_error *err);

/* ---- module-internal: for tests and benchmarks ---- */

/* Loss (weights energy_weight and force_weight on the two terms, no weight
 * decay) of member k of model m on structures idx[0..n) of data, and its
 * gradient (if grad is not NULL) in member k's network parameters, laid out
 * as nd_train_member_doubles(m) values: per element, nd_net_tangent's
 * member block. */
int nd_train_loss(const nd_model *m, int k, const nd_dataset *data, const long *idx, int n,
                  double energy_weight, double force_weight, double *loss, double *grad,
                  nd_error *err);

size_t nd_train_member_doubles(const nd_model *m);

/* Copies member k's network parameters out of (get) or into (set) m in the
 * layout above. */
void nd_train_member_get(const nd_model *m, int k, double *theta);
void nd_train_member_set(nd_model *m, int k, const double *theta);

/* The model being trained (current weights), owned by t. */
nd_model *nd_train_current(nd_train *t);

#endif
