/* JSON output helpers (cJSON) shared by the commands: whole documents
 * written atomically, molecule summaries, number arrays, and JSON Lines
 * streams that are flushed after every line. */
#ifndef ND_REPORT_H
#define ND_REPORT_H

#include "core/molecule.h"

#include <cjson/cJSON.h>
#include <stdio.h>

/* Writes doc, indented, followed by a newline, to path ("-" for stdout).
 * A file is written under a temporary name in the same directory and
 * renamed into place, so readers never see half a document. doc stays the
 * caller's. ND_OK, ND_ENOMEM or ND_EIO (naming the path). */
int nd_report_write(const cJSON *doc, const char *path, nd_error *err);

/* A new JSON object summarising m: "title" (string or null), "formula"
 * (Hill order), "atoms", "molar_mass" (g/mol, IUPAC standard weights),
 * "total_charge", "bonds" (only when m has a bond table), "data_items"
 * (count). The caller owns the result (cJSON_Delete). NULL on no memory. */
cJSON *nd_report_molecule(const nd_molecule *m);

/* Adds an array of n numbers under name to obj (a non-finite value becomes
 * null, as JSON has no NaN). ND_OK, ND_EINVAL (n < 0 or v NULL with n > 0),
 * ND_ENOMEM. */
int nd_report_add_numbers(cJSON *obj, const char *name, const double *v, int n, nd_error *err);

/* Writes v into buf (at least 32 bytes) with the fewest digits (15 to 17)
 * that read back as exactly v, and returns buf. cJSON's own printer only
 * checks the round trip to within a tolerance; model and dataset files need
 * the same bits back. */
char *nd_report_exact(double v, char *buf);

/* Adds number v to o under key, printed by nd_report_exact (a raw JSON
 * number). v must be finite. */
void nd_report_add_exact(cJSON *o, const char *key, double v);

/* A JSON Lines stream: one compact JSON value per line. */
typedef struct nd_report_lines nd_report_lines;

/* Opens path for appending ("-" for stdout); the file is created if
 * missing. Appending, not replacing, is the point: a long run adds one
 * complete line per result, flushed at once, so an interrupted run keeps
 * every finished line. *out is closed with nd_report_lines_close. */
int nd_report_lines_open(nd_report_lines **out, const char *path, nd_error *err);

/* Appends item as one line and flushes. ND_OK, ND_ENOMEM, ND_EIO. */
int nd_report_lines_write(nd_report_lines *j, const cJSON *item, nd_error *err);

/* Closes (stdout is only flushed) and frees; accepts NULL. Returns ND_OK
 * or ND_EIO if the final flush or close failed. */
int nd_report_lines_close(nd_report_lines *j, nd_error *err);

#endif
