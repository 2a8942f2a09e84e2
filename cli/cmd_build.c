/* nadir build: 3D structures from SMILES. The argument is a SMILES string,
 * or a file of SMILES (one per line, an optional name after whitespace;
 * blank lines and lines starting with '#' skipped; '-' for standard
 * input). Each molecule gets --count structures from independent starts,
 * written as SD records. A line that cannot be read or built is reported
 * with its line number and the others are still built. */
#include "cli/cli.h"

#include <ctype.h>
#include <errno.h>
#include <getopt.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>

static const char *CMD = "build";

typedef struct {
    const char *input, *output;
    int count;
    unsigned long long seed;
} build_options;

/* The --help text. */
static void usage(FILE *f)
{
    fprintf(f,
            "usage: nadir build SMILES|FILE [-o OUT.sdf|OUT.xyz] [--count N] [--seed S]\n"
            "\n"
            "Builds 3D structures (hydrogens included) from SMILES by distance geometry,\n"
            "with the stereochemistry the SMILES states: @/@@ centres and / \\ double bonds.\n"
            "Every structure is checked (bond lengths, contacts, stereo) before it is\n"
            "written. The same input and seed give the same coordinates.\n"
            "\n"
            "  SMILES        one molecule, e.g. 'CC(=O)Oc1ccccc1C(=O)O'\n"
            "  FILE          a file of SMILES, one per line, optional name after whitespace\n"
            "                ('-' reads standard input); each line becomes its records\n"
            "  -o, --output OUT.sdf|OUT.xyz\n"
            "                file to write, SD (bonds, stereo and the data items below\n"
            "                kept) or XYZ, by its extension (default: SD on standard output)\n"
            "  --count N     structures per molecule from independent starts (default 1)\n"
            "  --seed S      seed of the random starts (default 1)\n"
            "  --help        this text\n"
            "\n"
            "Each record's title is the molecule's name (or its SMILES); data items\n"
            "'smiles', 'structure' (1..N) and 'seed' say where it came from.\n"
            "\n"
            "examples:\n"
            "  nadir build 'N[C@@H](C)C(=O)O' -o alanine.sdf\n"
            "  nadir build ligands.smi -o ligands.sdf --count 5 --seed 7\n"
            "\n"
            "exit: 0 all built, 5 some lines failed (each reported with its line),\n"
            "3 nothing could be read, 4 nothing could be built, 2 usage\n");
}

/* Parses the command line into *o: 0 to go on, -1 after --help, or a
 * usage exit code. */
static int parse(int argc, char **argv, build_options *o)
{
    static const struct option longopts[] = {{"output", required_argument, NULL, 'o'},
                                              {"count", required_argument, NULL, 'c'},
                                              {"seed", required_argument, NULL, 's'},
                                              {"help", no_argument, NULL, 'h'},
                                              {NULL, 0, NULL, 0}};
    memset(o, 0, sizeof *o);
    o->output = "-";
    o->count = 1;
    o->seed = 1;
    opterr = 0;
    optind = 1;
    int c;
    while ((c = getopt_long(argc, argv, ":o:h", longopts, NULL)) != -1) {
        switch (c) {
        case 'o': o->output = optarg; break;
        case 'c':
            if (cli_parse_int(optarg, &o->count) != 0 || o->count < 1 || o->count > 100000)
                return cli_usage(CMD, "--count needs a whole number from 1 to 100000, not '%s'", optarg);
            break;
        case 's': {
            char *end;
            errno = 0;
            unsigned long long v = strtoull(optarg, &end, 10);
            if (end == optarg || *end || errno == ERANGE || optarg[0] == '-')
                return cli_usage(CMD, "--seed needs a whole number >= 0, not '%s'", optarg);
            o->seed = v;
            break;
        }
        case 'h': usage(stdout); return -1;
        case ':': return cli_usage(CMD, "option %s needs a value", argv[optind - 1]);
        default: return cli_usage(CMD, "unknown option '%s'", argv[optind - 1]);
        }
    }
    if (argc - optind != 1)
        return cli_usage(CMD, "expected one SMILES or file, got %d arguments", argc - optind);
    o->input = argv[optind];
    return 0;
}

typedef struct {
    nd_writer *w;
    int built, failed;
} build_state;

/* Builds count structures of the molecule written smiles (name may be
 * empty) and writes them. where names the input position for messages.
 * Returns ND_OK or the failure's status (already reported). */
static int build_one(build_state *st, const build_options *o, const char *smiles, const char *name,
                     const char *where)
{
    nd_molecule mol;
    nd_molecule_init(&mol);
    nd_error err;
    nd_error_clear(&err);
    int rc = nd_smiles_parse(smiles, &mol, &err);
    if (rc == ND_OK)
        rc = nd_molecule_set_title(&mol, name && *name ? name : smiles, &err);
    if (rc == ND_OK)
        rc = nd_molecule_set_data(&mol, "smiles", smiles, &err);
    char buf[32];
    snprintf(buf, sizeof buf, "%llu", o->seed);
    if (rc == ND_OK)
        rc = nd_molecule_set_data(&mol, "seed", buf, &err);
    for (int k = 0; k < o->count && rc == ND_OK; k++) {
        rc = nd_embed_molecule(&mol, o->seed, k, NULL, &err);
        if (rc != ND_OK) {
            nd_error_prefix(&err, "structure %d", k + 1);
            break;
        }
        snprintf(buf, sizeof buf, "%d", k + 1);
        if ((rc = nd_molecule_set_data(&mol, "structure", buf, &err)) != ND_OK)
            break;
        if ((rc = nd_writer_write(st->w, &mol, &err)) != ND_OK)
            break;
    }
    nd_molecule_free(&mol);
    if (rc != ND_OK) {
        if (where)
            nd_error_prefix(&err, "%s", where);
        fprintf(stderr, "nadir %s: %s\n", CMD, err.msg);
        st->failed++;
        return rc;
    }
    st->built++;
    return ND_OK;
}

/* 1 if path names an existing regular file (or is "-"). */
static int is_file(const char *path)
{
    struct stat sb;
    return strcmp(path, "-") == 0 || (stat(path, &sb) == 0 && S_ISREG(sb.st_mode));
}

/* What an SD or XYZ file given by mistake (stdin, or a .smi name) shows in
 * its first lines, or NULL: line 4 an SD counts line, or line 1 an atom
 * count alone (never valid SMILES). head[k] is line k + 1 or NULL. */
static const char *other_format(char *const head[4])
{
    if (head[3] && strlen(head[3]) >= 39 &&
        (strncmp(head[3] + 34, "V2000", 5) == 0 || strncmp(head[3] + 34, "V3000", 5) == 0))
        return "an SD file (line 4 is a counts line)";
    if (head[0]) {
        const char *p = head[0] + strspn(head[0], " \t");
        size_t d = strspn(p, "0123456789");
        if (d > 0 && p[d + strspn(p + d, " \t\r\n")] == '\0')
            return "an XYZ file (line 1 is an atom count)";
    }
    return NULL;
}

/* Builds one line of a SMILES file (SMILES, then an optional name). */
static void build_line(build_state *st, const build_options *o, const char *name, long lineno,
                       char *p, int *last_status)
{
    if (lineno == 1 && strncmp(p, "\xef\xbb\xbf", 3) == 0)
        p += 3; /* a UTF-8 byte-order mark (Windows editors) */
    while (isspace((unsigned char)*p))
        p++;
    if (!*p || *p == '#')
        return;
    char *e = p;
    while (*e && !isspace((unsigned char)*e))
        e++;
    char *nm = e;
    if (*nm)
        *nm++ = '\0';
    while (isspace((unsigned char)*nm))
        nm++;
    size_t nl = strlen(nm);
    while (nl > 0 && isspace((unsigned char)nm[nl - 1]))
        nm[--nl] = '\0';
    char where[512];
    snprintf(where, sizeof where, "%s, line %ld", name, lineno);
    int s = build_one(st, o, p, nm, where);
    if (s != ND_OK)
        *last_status = s;
}

/* Builds every line of a SMILES file. Returns the status of the last
 * fatal error (I/O, or an SD/XYZ file given instead), or ND_OK; per-line
 * failures are counted in st. The first four lines are read before any is
 * built, so a file of another format is refused before anything is written. */
static int build_file(build_state *st, const build_options *o, int *last_status)
{
    FILE *f = strcmp(o->input, "-") == 0 ? stdin : fopen(o->input, "r");
    if (!f)
        return cli_fail(CMD, ND_EIO, "cannot open %s: %s", o->input, strerror(errno)), ND_EIO;
    const char *name = strcmp(o->input, "-") == 0 ? "stdin" : o->input;
    char *head[4] = {NULL, NULL, NULL, NULL};
    char *line = NULL;
    size_t cap = 0;
    long lineno = 0;
    int status = ND_OK;
    for (int k = 0; k < 4; k++) {
        size_t hc = 0;
        if (getline(&head[k], &hc, f) < 0) {
            free(head[k]);
            head[k] = NULL;
            break;
        }
    }
    const char *kind = other_format(head);
    if (kind) {
        cli_fail(CMD, ND_EINPUT, "%s looks like %s; build reads SMILES, one per line", name, kind);
        status = ND_EINPUT;
        goto done;
    }
    nd_progress prog;
    nd_progress_start(&prog, "molecules", 0);
    for (int k = 0; k < 4 && head[k]; k++) {
        build_line(st, o, name, ++lineno, head[k], last_status);
        nd_progress_update(&prog, st->built + st->failed);
    }
    while (head[3] && getline(&line, &cap, f) >= 0) {
        build_line(st, o, name, ++lineno, line, last_status);
        nd_progress_update(&prog, st->built + st->failed);
    }
    nd_progress_finish(&prog);
    if (ferror(f)) {
        cli_fail(CMD, ND_EIO, "error reading %s", name);
        status = ND_EIO;
    }
done:
    for (int k = 0; k < 4; k++)
        free(head[k]);
    free(line);
    if (f != stdin)
        fclose(f);
    return status;
}

int cmd_build(int argc, char **argv)
{
    build_options o;
    int rc = parse(argc, argv, &o);
    if (rc != 0)
        return rc < 0 ? ND_EXIT_OK : rc;
    nd_error err;
    nd_error_clear(&err);
    build_state st = {NULL, 0, 0};
    /* The output's extension chooses SD (bonds and stereo kept) or XYZ: a
     * file named .xyz holding SD text would mislead every later reader. */
    nd_format to = strcmp(o.output, "-") == 0 ? ND_FORMAT_SDF : nd_format_from_path(o.output);
    if (to == ND_FORMAT_SMILES)
        return cli_usage(CMD, "%s is named as a SMILES file; build writes 3D structures "
                         "(name the output .sdf or .xyz)", o.output);
    if (nd_writer_open(&st.w, o.output, to == ND_FORMAT_XYZ ? ND_FORMAT_XYZ : ND_FORMAT_SDF, &err) != ND_OK)
        return cli_error(CMD, &err);
    int last = ND_OK;
    struct stat sb;
    nd_format named = nd_format_from_path(o.input);
    if (strcmp(o.input, "-") != 0 && stat(o.input, &sb) == 0 && S_ISDIR(sb.st_mode)) {
        nd_writer_abort(st.w);
        return cli_fail(CMD, ND_EINPUT, "%s is a directory, not a SMILES file", o.input);
    }
    if (named == ND_FORMAT_SDF || named == ND_FORMAT_XYZ) {
        nd_writer_abort(st.w);
        return cli_fail(CMD, ND_EINPUT,
                        "%s is named as %s; build reads SMILES (a string, or a .smi file "
                        "of one per line); use nadir convert or optimize for 3D files",
                        o.input, named == ND_FORMAT_SDF ? "an SD file" : "an XYZ file");
    }
    if (is_file(o.input) || named != ND_FORMAT_AUTO) {
        if (build_file(&st, &o, &last) != ND_OK) {
            nd_writer_abort(st.w);
            return ND_EXIT_INPUT;
        }
        if (st.built + st.failed == 0) {
            nd_writer_abort(st.w);
            return cli_fail(CMD, ND_EINPUT, "%s has no SMILES lines",
                            strcmp(o.input, "-") == 0 ? "stdin" : o.input);
        }
    } else {
        last = build_one(&st, &o, o.input, NULL, NULL);
    }
    if (st.built == 0) {
        nd_writer_abort(st.w);
        return cli_exit_code(last == ND_OK ? ND_EINPUT : last);
    }
    if (nd_writer_close(st.w, &err) != ND_OK)
        return cli_error(CMD, &err);
    fprintf(stderr, "nadir %s: %d molecule%s built (%d structure%s each) to %s", CMD, st.built,
            st.built == 1 ? "" : "s", o.count, o.count == 1 ? "" : "s",
            strcmp(o.output, "-") == 0 ? "stdout" : o.output);
    if (st.failed)
        fprintf(stderr, "; %d failed", st.failed);
    fputc('\n', stderr);
    return st.failed ? ND_EXIT_PARTIAL : ND_EXIT_OK;
}
