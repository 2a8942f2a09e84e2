/* Whole-file input for files read at once (model files, training states,
 * descriptor files). Internal to the library; not part of nadir.h. */
#ifndef ND_READFILE_H
#define ND_READFILE_H

#include "core/status.h"

#include <stddef.h>

/* Reads the file at path into a malloc'd buffer with a NUL byte after its
 * *len bytes (*out, freed by the caller). what names the kind of file in
 * messages ("model file"). max > 0 refuses a larger file with ND_EINPUT;
 * 0: no limit. ND_EIO when it cannot be opened or read, ND_ENOMEM; every
 * message starts with the path. */
int nd_read_file(const char *path, const char *what, size_t max, unsigned char **out, size_t *len,
                 nd_error *err);

#endif
