/* The descriptor parameters as JSON: the "descriptor" object of a model
 * file's header, which is also what `nadir train --descriptor FILE` reads,
 * so a descriptor can be copied from a model into a new training run.
 *
 *   {"radial_cutoff": 5.2, "radial": [{"eta": 14.8, "shift": 0.8}, ...],
 *    "angular_cutoff": 3.5, "angular": [{"eta": 0.05, "zeta": 1, "lambda": 1}, ...]}
 *
 * Other members (a model header's "kind", "cutoff_function", "features")
 * are ignored on reading. */
#ifndef ND_DESCRIPTOR_JSON_H
#define ND_DESCRIPTOR_JSON_H

#include "core/status.h"
#include "potential/descriptor.h"

#include <cjson/cJSON.h>
#include <stddef.h>

/* Adds p's cutoffs and function lists to the object d, every number
 * written so that it reads back bit for bit. */
void nd_descriptor_json_add(cJSON *d, const nd_descriptor_params *p);

/* Reads the object d into *p. where starts every message (a file name and
 * what it is, e.g. "run.json: descriptor"). ND_EINPUT naming the missing
 * or malformed member (by list and position) or the first parameter
 * nd_descriptor_check rejects; *p is then unspecified. */
int nd_descriptor_json_read(const cJSON *d, const char *where, nd_descriptor_params *p,
                            nd_error *err);

/* Parses n bytes of text (not NUL-terminated) as a descriptor file; name
 * starts the messages, and a syntax error names its line. For the file
 * reader below, tests and fuzzing. */
int nd_descriptor_json_parse(const char *text, size_t n, const char *name,
                             nd_descriptor_params *p, nd_error *err);

/* Reads a descriptor file: a JSON object that is either the descriptor
 * itself or holds one under "descriptor" (such as a model header copied
 * out). ND_EIO when it cannot be read, ND_EINPUT naming the file otherwise. */
int nd_descriptor_json_load(const char *path, nd_descriptor_params *p, nd_error *err);

#endif
