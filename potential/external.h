/* An external program as a potential: any program that computes an energy
 * and gradient becomes an nd_energy through a small JSON protocol over its
 * standard input and output. One process per evaluation, so calls from
 * several threads run side by side.
 *
 * The command. A command string is split into words by these rules only
 * (there is no shell: no variables, globbing, pipes or redirection; the
 * characters ; | & < > $ ` * ? are ordinary):
 *   - unquoted spaces, tabs and newlines separate words;
 *   - '...' keeps everything inside literally;
 *   - "..." keeps everything inside, except that \" and \\ stand for " and \;
 *   - outside quotes, a backslash makes the next character ordinary;
 *   - quoted and unquoted pieces next to each other form one word ('' is an
 *     empty word).
 * The first word is the program: a path, or a name looked up in PATH. It
 * runs in the caller's working directory with the caller's environment, in
 * a process group of its own (so a timeout can end it with its children).
 *
 * The request, one JSON object written to the program's standard input,
 * which is then closed:
 *   {"protocol": "nadir-external/1", "want": ["energy", "gradient"],
 *    "elements": ["O", "H", "H"],
 *    "coordinates": [[0.0, 0.0, 0.1173], [0.0, 0.7572, -0.4692], ...],
 *    "coordinate_unit": "angstrom", "charge": 0, "multiplicity": 1}
 * "want" is ["energy"] when only the energy is needed.
 *
 * The answer, one JSON object on standard output (nothing else but
 * whitespace), and exit status 0:
 *   {"energy": -5.0704, "energy_unit": "hartree",
 *    "gradient": [[0.0, 0.0, 0.0029], ...], "gradient_unit": "hartree/bohr"}
 * - energy units: "hartree", "kcal/mol", "kJ/mol", "eV";
 * - gradient units: ENERGY/LENGTH with LENGTH "angstrom" or "bohr", for
 *   example "hartree/bohr", "eV/angstrom", "kcal/mol/angstrom";
 * - the gradient is dE/dx (not the force), as n triples or 3n numbers; it
 *   may be left out when only the energy was wanted;
 * - a program that cannot do the job may answer {"error": "reason"} (with
 *   any exit status): the reason is passed on to the user.
 * Values are converted to kcal/mol and kcal/mol/angstrom on reading with
 * the CODATA 2018 factors of core/units.h.
 *
 * Failures are ND_EEXTERNAL errors that say what happened: the program could
 * not be started, exited with a status or a signal (with the last lines of
 * its standard error), ran past the timeout (its process group is killed),
 * or answered something that is not the object above (not JSON, missing or
 * non-numeric members, wrong gradient length, non-finite numbers, unknown
 * units). */
#ifndef ND_EXTERNAL_H
#define ND_EXTERNAL_H

#include "core/energy.h"
#include "core/status.h"

/* Splits a command string into words by the rules above. On success *argv
 * is a malloc'd NULL-terminated array of malloc'd strings (free with
 * nd_external_free_argv) and *argc its length (at least 1). An empty command
 * or an unclosed quote is ND_EINPUT. */
int nd_external_split(const char *command, char ***argv, int *argc, nd_error *err);

/* Frees an array from nd_external_split; accepts NULL. */
void nd_external_free_argv(char **argv);

typedef struct nd_external nd_external;

/* Creates an external potential for molecules of n atoms with atomic
 * numbers z (copied), total charge and spin multiplicity. timeout is the
 * limit of one evaluation in seconds (> 0). Splits command (ND_EINPUT on a
 * bad command); does not run it yet. Free with nd_external_free. */
int nd_external_new(nd_external **out, const char *command, int n, const int *z, int charge,
                    int multiplicity, double timeout, nd_error *err);

/* Frees ext; accepts NULL. */
void nd_external_free(nd_external *ext);

/* Runs the program once on coordinates x (3n, angstrom): energy in
 * kcal/mol, gradient g (3n, kcal/mol/angstrom) or NULL for the energy
 * alone. Safe to call from several threads at once. Returns ND_OK or an
 * error (ND_EEXTERNAL for the program's failures) described in err. */
int nd_external_eval(nd_external *ext, const double *x, double *energy, double *g, nd_error *err);

/* The potential as the algorithms see it: fn calls nd_external_eval, batch
 * is NULL (nd_energy_batch then runs structures in parallel, one process
 * each). The message of the most recent failure is kept in ext; read it with
 * nd_external_last_error. ext must outlive the returned value. */
nd_energy nd_external_energy(nd_external *ext);

/* Copies the most recent failure of a call through nd_external_energy into
 * err (ND_OK and an empty message if none). */
void nd_external_last_error(nd_external *ext, nd_error *err);

/* Number of program runs so far (all threads). */
long nd_external_calls(const nd_external *ext);

#endif
