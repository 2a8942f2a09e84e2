/* Shared pieces of the command-line program (not part of the library). */
#ifndef ND_CLI_H
#define ND_CLI_H

#include "nadir.h"

/* Exit codes of the nadir program (documented in `nadir --help` and README). */
enum {
    ND_EXIT_OK = 0,       /* everything asked for was done */
    ND_EXIT_INTERNAL = 1, /* out of memory or an internal error */
    ND_EXIT_USAGE = 2,    /* bad command line */
    ND_EXIT_INPUT = 3,    /* unreadable or invalid input; nothing usable was produced */
    ND_EXIT_COMPUTE = 4,  /* a computation failed (did not converge, non-finite values) */
    ND_EXIT_PARTIAL = 5   /* finished, but some records failed and were reported */
};

#define COMMAND(word, fn, summary) int fn(int argc, char **argv);
#include "cli/commands.h"
#undef COMMAND

/* Maps a library status to an exit code. */
int cli_exit_code(int status);

/* Prints "nadir COMMAND: message" to stderr and returns the exit code for
 * status, for `return cli_fail(...)` in commands. */
int cli_fail(const char *command, int status, const char *fmt, ...)
    __attribute__((format(printf, 3, 4)));

/* Prints an error record as "nadir COMMAND: message" and returns its exit code. */
int cli_error(const char *command, const nd_error *err);

/* Usage error: prints the message and a pointer to --help; returns ND_EXIT_USAGE. */
int cli_usage(const char *command, const char *fmt, ...) __attribute__((format(printf, 2, 3)));

/* Checks, before a long run, that the output file path could be written
 * at the end: its directory exists and is writable and path is not a
 * directory. "-" and NULL pass. 0, or prints "nadir COMMAND: ..." naming
 * the option and returns ND_EXIT_INPUT. */
int cli_check_output(const char *command, const char *option, const char *path);

/* nd_reader_open for a command that needs 3D structures. When path names
 * no file but reads as SMILES (a frequent slip: `nadir optimize 'CCO'`),
 * the error says so and names the commands that help (build, or
 * conformers, which takes SMILES). Returns 0, or prints the error and
 * returns its exit code. */
int cli_open_structures(const char *command, const char *path, nd_format fmt, nd_reader **r);

/* When two atoms of mol are closer than 0.5 angstrom (a broken structure,
 * the usual reason a potential fails), writes " (atoms I and J are only D A
 * apart)" into buf and returns 1; otherwise buf = "" and 0. */
int cli_close_contact(const nd_molecule *mol, char *buf, size_t size);

/* Parses a whole string as a number; 0 on success, -1 if it is not one. */
int cli_parse_double(const char *s, double *out);
int cli_parse_int(const char *s, int *out);

/* Finds the bundled model when no --model is given: next to the program
 * (BIN/../share/nadir/models/default.model), then in the source tree
 * (BIN/../potential/models/default.model, potential/models/default.model
 * from the current directory). Writes the path to out and returns 0, or
 * returns -1 with the places tried, comma-separated, in looked. */
int cli_find_model(char *out, size_t size, char *looked, size_t lsize);

/* The model file of a command: given (its --model) as it is, else the
 * bundled model (cli_find_model). external_ok: the command also takes
 * --potential-command, which the message then offers. Returns 0 with the
 * path in out, or prints "nadir COMMAND: no potential given and no bundled
 * model found (looked for ...): pass --model FILE [or --potential-command
 * CMD]" and returns ND_EXIT_USAGE. */
int cli_model_path(const char *command, const char *given, int external_ok, char *out,
                   size_t size);

/* Prints the model's provenance "status" (e.g. that it is a pilot model that
 * does not meet the accuracy goals) to stderr, when the file states one. */
void cli_model_notice(const char *command, const char *path, const nd_model *model);

/* The end of a run that wrote files: the JSON document doc (may be NULL) to
 * standard output when to_stdout and to report when it is not NULL, then
 * the writers *w1 and *w2 (either may be NULL or hold NULL) closed and set
 * to NULL. Returns 0, or prints the first error and returns its exit code
 * (the writers not yet closed are left for the caller to abort). */
int cli_finish(const char *command, const cJSON *doc, int to_stdout, const char *report,
               nd_writer **w1, nd_writer **w2);

/* Size domain: when the model's provenance names the largest molecule it
 * was trained on ("training_sizes": {"heavy_atoms_max": N}) and mol has
 * more heavy atoms, prints "nadir COMMAND: note: WHERE has H heavy atoms;
 * the model was trained on molecules of at most N ..." and returns 1;
 * otherwise (also when the model does not say) returns 0 silently. Only the
 * first CLI_SIZE_NOTES such notes of a run are printed, then one line saying
 * that more records are outside; the return value still flags each. */
#define CLI_SIZE_NOTES 3
int cli_size_note(const char *command, const nd_model *model, const nd_molecule *mol,
                  const char *where);

#endif
