/* Line-by-line text input shared by the XYZ, SD and SMILES readers
 * (internal to core; not part of nadir.h).
 *
 * A line source reads from a memory buffer (the sniffed head of a file, or a
 * whole buffer for the fuzzers) and then, if one is given, from a FILE. It
 * numbers lines from 1, strips the line end ("\n" and any "\r" just before
 * it) and a UTF-8 byte-order mark at the start of the first line, lets
 * the caller push back one line, refuses lines longer than ND_LINE_MAX
 * bytes and lines holding a NUL byte (binary data), and
 * formats error messages as "FILE, UNIT N, line L: ...". */
#ifndef ND_LINEIO_H
#define ND_LINEIO_H

#include "core/status.h"

#include <stddef.h>
#include <stdio.h>

/* Longest line accepted, in bytes (without the line end). A real molecule
 * file line is well under 1 KiB; 1 MiB leaves room for long data items. */
#define ND_LINE_MAX (1 << 20)

typedef struct nd_lines {
    const char *name;        /* file name for messages ("stdin" for "-"); not owned */
    const char *unit;        /* "frame" or "record" in messages; not owned */
    int record;              /* record number for messages, 0 = none */
    const unsigned char *mem; /* head buffer read first; not owned */
    size_t mem_size, mem_pos;
    FILE *f;                 /* read after mem; NULL = memory only; not owned */
    char *buf;               /* current line, NUL-terminated; owned */
    size_t cap, len;
    long lineno;             /* number of the line in buf (0 before the first) */
    int pushed;              /* 1 when buf was pushed back and is returned again */
    int at_end;              /* 1 once the source is exhausted */
    long long consumed;      /* bytes read so far, line ends included */
} nd_lines;

/* Sets up l to read mem[0..size) and then f (either may be empty/NULL).
 * name and unit are kept by pointer and must outlive l. */
void nd_lines_init(nd_lines *l, const char *name, const char *unit, const void *mem, size_t size,
                   FILE *f);

/* Frees the line buffer; accepts NULL. Does not close f. */
void nd_lines_free(nd_lines *l);

/* Reads the next line into l->buf (l->len bytes). Returns ND_OK, ND_END at
 * the end of input, ND_EINPUT for a line that is too long or holds a NUL
 * byte (the rest of that line is consumed, so reading may go on), ND_EIO on
 * a read error, ND_ENOMEM. */
int nd_lines_next(nd_lines *l, nd_error *err);

/* Pushes the current line back: the next nd_lines_next returns it again
 * with the same line number. Only one line can be pushed back. */
void nd_lines_unread(nd_lines *l);

/* nd_fail with the message prefixed "NAME, UNIT RECORD, line LINE: " (the
 * record part is left out when record is 0, the line part when line is 0). */
int nd_lines_fail(const nd_lines *l, nd_error *err, nd_status code, long line, const char *fmt,
                  ...) __attribute__((format(printf, 5, 6)));

/* Parses a whole string as a plain decimal number ("-1.25", "3e-2", ".5",
 * Fortran "1.5D+01"; no hex). Returns 0 and *out; -1 if s is not a number;
 * -2 if it is not finite (overflow, or an inf/nan word). */
int nd_text_double(const char *s, double *out);

/* Parses a whole string as a decimal integer with optional sign. Returns 0
 * and *out, or -1 if s is not one or overflows. */
int nd_text_long(const char *s, long *out);

#endif
