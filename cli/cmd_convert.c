/* nadir convert: copies the records of one molecule file into another
 * format, keeping titles and data items (where the output format holds
 * them). The output appears only when the run finishes: it is written under
 * a temporary name and renamed. */
#include "cli/cli.h"

#include <getopt.h>
#include <stdio.h>
#include <string.h>
#include <sys/stat.h>

static const char *CMD = "convert";

typedef struct {
    const char *input, *output;
    nd_format from, to;
    int strict;
} convert_options;

static void usage(FILE *f)
{
    fprintf(f,
            "usage: nadir convert IN OUT [--from F] [--to F] [--strict]\n"
            "\n"
            "Copies every record of IN into OUT in another format. Titles are kept; data\n"
            "items are kept by SD output (XYZ and SMILES have no place for them). SD output\n"
            "is V2000 with coordinates to 4 decimals (the format's fixed columns); XYZ output\n"
            "keeps coordinates exactly. A bad record is reported on stderr with its file,\n"
            "record and line and left out; the others are converted. OUT appears only when\n"
            "the conversion is finished. What is lost is noted on stderr: charges, unpaired\n"
            "electrons and isotopes (XYZ output), bonds (XYZ input has none), coordinates\n"
            "(SMILES input has none: zeros in SD output, refused by XYZ output).\n"
            "\n"
            "  IN, OUT       .xyz, .sdf/.sd/.mol or .smi files; '-' is standard input/output\n"
            "  --from F      read IN as F (xyz, sdf, smiles) whatever its name\n"
            "  --to F        write OUT as F (needed when OUT is '-')\n"
            "  --strict      stop at the first bad record and write nothing\n"
            "  --help        this text\n"
            "\n"
            "examples:\n"
            "  nadir convert survey.sdf survey.xyz\n"
            "  nadir convert frames.xyz frames.sdf --strict\n"
            "  nadir convert - - --from sdf --to xyz < ligands.sdf > ligands.xyz\n"
            "\n"
            "exit: 0 all records converted, 5 some records failed, 3 none could be\n"
            "converted (or --strict and one failed), 2 usage\n");
}

static int parse(int argc, char **argv, convert_options *o)
{
    static const struct option longopts[] = {{"from", required_argument, NULL, 'f'},
                                              {"to", required_argument, NULL, 't'},
                                              {"strict", no_argument, NULL, 's'},
                                              {"help", no_argument, NULL, 'h'},
                                              {NULL, 0, NULL, 0}};
    memset(o, 0, sizeof *o);
    opterr = 0;
    optind = 1;
    int c;
    while ((c = getopt_long(argc, argv, ":h", longopts, NULL)) != -1) {
        switch (c) {
        case 'f':
        case 't': {
            nd_format f = nd_format_from_name(optarg);
            if (f == ND_FORMAT_AUTO)
                return cli_usage(CMD, "unknown format '%s'; expected xyz, sdf or smiles", optarg);
            if (c == 'f')
                o->from = f;
            else
                o->to = f;
            break;
        }
        case 's': o->strict = 1; break;
        case 'h': usage(stdout); return -1;
        case ':': return cli_usage(CMD, "option %s needs a value", argv[optind - 1]);
        default: return cli_usage(CMD, "unknown option '%s'", argv[optind - 1]);
        }
    }
    if (argc - optind != 2)
        return cli_usage(CMD, "expected an input and an output file, got %d name%s", argc - optind,
                         argc - optind == 1 ? "" : "s");
    o->input = argv[optind];
    o->output = argv[optind + 1];
    if (o->to == ND_FORMAT_AUTO) {
        o->to = strcmp(o->output, "-") == 0 ? ND_FORMAT_AUTO : nd_format_from_path(o->output);
        if (o->to == ND_FORMAT_AUTO)
            return cli_usage(CMD, "cannot tell the output format of '%s'; add --to xyz, sdf or smiles",
                             o->output);
    }
    struct stat si, so;
    if (strcmp(o->input, "-") != 0 &&
        (strcmp(o->input, o->output) == 0 ||
         (stat(o->input, &si) == 0 && stat(o->output, &so) == 0 && si.st_dev == so.st_dev &&
          si.st_ino == so.st_ino)))
        return cli_usage(CMD, "input and output are the same file '%s'", o->input);
    return 0;
}

/* Redraws the progress line for done records, with the total estimated
 * from the share of the input read so far (when its size is known). */
static void show_progress(nd_progress *p, const nd_reader *r, long done)
{
    long long bytes, size;
    if (p->enabled && nd_reader_bytes(r, &bytes, &size) && bytes > 0 && size > 0)
        nd_progress_estimate(p, (long)((double)done * (double)size / (double)bytes + 0.5));
    nd_progress_update(p, done);
}

int cmd_convert(int argc, char **argv)
{
    convert_options o;
    int rc = parse(argc, argv, &o);
    if (rc != 0)
        return rc < 0 ? ND_EXIT_OK : rc;

    const char *out_name = strcmp(o.output, "-") == 0 ? "stdout" : o.output;
    nd_error err;
    nd_error_clear(&err);
    nd_reader *r = NULL;
    nd_writer *w = NULL;
    nd_molecule mol;
    nd_molecule_init(&mol);
    int written = 0, failed = 0, lost_charge = 0, no_bonds = 0, no_coords = 0;

    if (nd_reader_open(&r, o.input, o.from, &err) != ND_OK) {
        rc = cli_error(CMD, &err);
        goto done;
    }
    if (nd_writer_open(&w, o.output, o.to, &err) != ND_OK) {
        rc = cli_error(CMD, &err);
        goto done;
    }
    nd_progress prog;
    nd_progress_start(&prog, "records", 0);
    for (;;) {
        int s = nd_reader_next(r, &mol, &err);
        if (s == ND_END)
            break;
        if (s == ND_OK) {
            s = nd_writer_write(w, &mol, &err);
            if (s != ND_OK)
                nd_error_prefix(&err, "%s, record %d", nd_reader_name(r), nd_reader_record(r));
            if (s == ND_OK) {
                written++;
                int isotopes = 0;
                for (int i = 0; i < mol.natoms && mol.isotope; i++)
                    isotopes |= mol.isotope[i] != 0;
                if (o.to == ND_FORMAT_XYZ && (mol.charge != 0 || mol.multiplicity != 1 || isotopes))
                    lost_charge++;
                if (o.to == ND_FORMAT_SDF && !mol.has_bonds && mol.natoms > 1)
                    no_bonds++;
                if (o.to == ND_FORMAT_SDF && mol.dimension == 0)
                    no_coords++;
                show_progress(&prog, r, written + failed);
                continue;
            }
        }
        nd_progress_finish(&prog);
        if (s != ND_EINPUT || o.strict) { /* final error, or any error under --strict */
            rc = cli_error(CMD, &err);
            if (o.strict && s == ND_EINPUT)
                fprintf(stderr, "nadir %s: stopped (--strict); %s not written\n", CMD, out_name);
            goto done;
        }
        failed++;
        fprintf(stderr, "nadir %s: %s\n", CMD, err.msg);
    }
    nd_progress_finish(&prog);
    if (written == 0) {
        fprintf(stderr, "nadir %s: no record could be converted; %s not written\n", CMD, out_name);
        rc = ND_EXIT_INPUT;
        goto done;
    }
    nd_writer *closing = w;
    w = NULL;
    if (nd_writer_close(closing, &err) != ND_OK) {
        rc = cli_error(CMD, &err);
        goto done;
    }
    fprintf(stderr, "nadir %s: %d record%s written to %s", CMD, written, written == 1 ? "" : "s",
            strcmp(o.output, "-") == 0 ? "stdout" : o.output);
    if (failed)
        fprintf(stderr, "; %d failed and left out", failed);
    fputc('\n', stderr);
    if (lost_charge)
        fprintf(stderr,
                "nadir %s: note: %d record%s had a net charge, unpaired electrons or isotope "
                "labels, which XYZ cannot hold; reading %s back gives neutral singlets of "
                "natural isotopes\n",
                CMD, lost_charge, lost_charge == 1 ? "" : "s",
                strcmp(o.output, "-") == 0 ? "the output" : o.output);
    if (no_bonds)
        fprintf(stderr,
                "nadir %s: note: %d record%s had no bond table (XYZ input); SD records written "
                "without bonds\n",
                CMD, no_bonds, no_bonds == 1 ? "" : "s");
    if (no_coords)
        fprintf(stderr,
                "nadir %s: note: %d record%s had no coordinates (SMILES); SD records written with "
                "all coordinates 0 (nadir build makes 3D structures)\n",
                CMD, no_coords, no_coords == 1 ? "" : "s");
    rc = failed ? ND_EXIT_PARTIAL : ND_EXIT_OK;
done:
    nd_writer_abort(w);
    nd_molecule_free(&mol);
    nd_reader_close(r);
    return rc;
}
