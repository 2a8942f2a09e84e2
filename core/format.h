/* Reading and writing molecule files record by record.
 *
 * Formats: XYZ (multi-frame), MDL molfile / SD file (V2000 read and write,
 * V3000 read), SMILES files (one per line, optional name after whitespace).
 * "-" means stdin for a reader and stdout for a writer. */
#ifndef ND_FORMAT_H
#define ND_FORMAT_H

#include "core/molecule.h"

#include <stddef.h>

typedef enum nd_format {
    ND_FORMAT_AUTO = 0, /* from the file name's extension, checked against the content */
    ND_FORMAT_XYZ,
    ND_FORMAT_SDF,      /* also .mol, .sd */
    ND_FORMAT_SMILES    /* .smi, .smiles */
} nd_format;

/* Format named by a word ("xyz", "sdf", "mol", "smi"), or ND_FORMAT_AUTO if
 * unknown. */
nd_format nd_format_from_name(const char *name);

/* Format from the extension of path; ND_FORMAT_AUTO if unknown. */
nd_format nd_format_from_path(const char *path);

/* Short name of a format ("xyz", "sdf", "smiles"). */
const char *nd_format_name(nd_format f);

typedef struct nd_reader nd_reader;

/* Opens path ("-" for stdin). With ND_FORMAT_AUTO the extension decides and
 * the first bytes are checked against it; stdin without a format is sniffed
 * from its content. *out is freed with nd_reader_close. */
int nd_reader_open(nd_reader **out, const char *path, nd_format fmt, nd_error *err);

/* Opens a reader over size bytes at data (not copied: they must outlive the
 * reader). name is used in messages and, with ND_FORMAT_AUTO, its extension
 * picks the format as for a file; a name without one means the content is
 * sniffed. For tests, fuzzers and embedding programs. */
int nd_reader_open_memory(nd_reader **out, const char *name, const void *data, size_t size,
                          nd_format fmt, nd_error *err);

/* Reads the next record into mol (cleared first). Returns ND_OK, ND_END when
 * the input is exhausted, or an error naming the file, record and line. After
 * an ND_EINPUT error the reader has skipped to the start of the next record,
 * so the caller may go on; after other errors it may not. An input with no
 * record at all gives one ND_EINPUT ("no records") and then ND_END, so an
 * empty file is never mistaken for an empty result. */
int nd_reader_next(nd_reader *r, nd_molecule *mol, nd_error *err);

/* 1-based number of the record last returned (or failed). */
int nd_reader_record(const nd_reader *r);

/* Name of the input as used in messages ("stdin" for "-"). Owned by r. */
const char *nd_reader_name(const nd_reader *r);

/* Bytes of the input read so far (*done) and its size (*total, -1 when
 * unknown, as for a pipe). Returns 1 when the size is known. For progress
 * estimates. */
int nd_reader_bytes(const nd_reader *r, long long *done, long long *total);

/* Format actually being read. */
nd_format nd_reader_format(const nd_reader *r);

/* Closes and frees; accepts NULL. */
void nd_reader_close(nd_reader *r);

typedef struct nd_writer nd_writer;

/* Opens path for writing ("-" for stdout). The file is written under a
 * temporary name in the same directory and renamed on nd_writer_close, so
 * an interrupted run never leaves a half-written result. */
int nd_writer_open(nd_writer **out, const char *path, nd_format fmt, nd_error *err);

/* Appends one record. A record the format cannot hold (no coordinates for
 * XYZ, more than 999 atoms for SD V2000, ...) is ND_EINPUT naming the output
 * and record, and nothing of it is written, so the caller may go on. */
int nd_writer_write(nd_writer *w, const nd_molecule *mol, nd_error *err);

/* Flushes, renames into place and frees w. On error the temporary is removed. */
int nd_writer_close(nd_writer *w, nd_error *err);

/* Discards what was written (removes the temporary) and frees w; accepts NULL. */
void nd_writer_abort(nd_writer *w);

#endif
