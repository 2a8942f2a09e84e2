/* nadir inspect: one line per record of a molecule file (formula, atoms,
 * molar mass, charge, bonds, data items), as a table or as JSON. */
#include "cli/cli.h"

#include <getopt.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

static const char *CMD = "inspect";

typedef struct {
    const char *input;
    nd_format format;
    int json;
} inspect_options;

/* One summary row, kept until the table's column widths are known. */
typedef struct {
    int record;
    char *title;   /* owned, never NULL */
    char *formula; /* owned */
    int atoms, charge, bonds, has_bonds, data;
    double mass;
} row;

static void usage(FILE *f)
{
    fprintf(f,
            "usage: nadir inspect IN [--json] [--format F]\n"
            "\n"
            "Lists every record of a molecule file: record number, title, formula (Hill\n"
            "order), atom count, molar mass (g/mol, IUPAC standard atomic weights), total\n"
            "charge, bond count (when the file has bonds) and number of data items.\n"
            "A bad record is reported on stderr with its file, record and line, and the\n"
            "others are still listed. Counts are of the atoms in the file: a record whose\n"
            "bonds leave valences open (hydrogens left implicit) gets a note on stderr,\n"
            "and so does an SD record with atoms but no bonds (made from XYZ).\n"
            "\n"
            "  IN            .xyz, .sdf/.sd/.mol or .smi file; '-' reads standard input\n"
            "  --json        print one JSON document instead of the table\n"
            "  --format F    read IN as F (xyz, sdf, smiles) whatever its name\n"
            "  --help        this text\n"
            "\n"
            "examples:\n"
            "  nadir inspect survey.sdf\n"
            "  nadir inspect frames.xyz --json > frames.json\n"
            "  cat ligand.mol | nadir inspect - --format sdf\n"
            "\n"
            "exit: 0 all records read, 5 some records failed, 3 none could be read, 2 usage\n");
}

static int parse(int argc, char **argv, inspect_options *o)
{
    static const struct option longopts[] = {{"json", no_argument, NULL, 'j'},
                                              {"format", required_argument, NULL, 'f'},
                                              {"help", no_argument, NULL, 'h'},
                                              {NULL, 0, NULL, 0}};
    memset(o, 0, sizeof *o);
    opterr = 0;
    optind = 1;
    int c;
    while ((c = getopt_long(argc, argv, ":h", longopts, NULL)) != -1) {
        switch (c) {
        case 'j': o->json = 1; break;
        case 'f':
            o->format = nd_format_from_name(optarg);
            if (o->format == ND_FORMAT_AUTO)
                return cli_usage(CMD, "unknown format '%s'; expected xyz, sdf or smiles", optarg);
            break;
        case 'h': usage(stdout); return -1;
        case ':': return cli_usage(CMD, "option %s needs a value", argv[optind - 1]);
        default: return cli_usage(CMD, "unknown option '%s'", argv[optind - 1]);
        }
    }
    if (optind >= argc)
        return cli_usage(CMD, "no input file given");
    if (argc - optind > 1)
        return cli_usage(CMD, "one input file expected, got %d", argc - optind);
    o->input = argv[optind];
    return 0;
}

/* Copies s (or "" for NULL) with line breaks as spaces; NULL on no memory. */
static char *flat_copy(const char *s)
{
    if (!s)
        s = "";
    size_t n = strlen(s);
    char *d = malloc(n + 1);
    if (!d)
        return NULL;
    for (size_t i = 0; i <= n; i++)
        d[i] = (s[i] == '\n' || s[i] == '\r' || s[i] == '\t') ? ' ' : s[i];
    return d;
}

/* Prints the rows as an aligned table; titles wider than 40 are cut with "...". */
static void print_table(const row *rows, int n)
{
    int tw = 5, fw = 7;
    for (int i = 0; i < n; i++) {
        int t = (int)strlen(rows[i].title), f = (int)strlen(rows[i].formula);
        tw = t > tw ? t : tw;
        fw = f > fw ? f : fw;
    }
    if (tw > 40)
        tw = 40;
    printf("%6s  %-*s  %-*s  %6s  %12s  %6s  %6s  %4s\n", "record", tw, "title", fw, "formula",
           "atoms", "mass g/mol", "charge", "bonds", "data");
    for (int i = 0; i < n; i++) {
        const row *r = &rows[i];
        char title[48];
        if ((int)strlen(r->title) > tw)
            snprintf(title, sizeof title, "%.*s...", tw - 3, r->title);
        else
            snprintf(title, sizeof title, "%s", r->title);
        char bonds[16];
        if (r->has_bonds)
            snprintf(bonds, sizeof bonds, "%d", r->bonds);
        else
            snprintf(bonds, sizeof bonds, "-");
        char charge[16];
        snprintf(charge, sizeof charge, r->charge ? "%+d" : "%d", r->charge);
        printf("%6d  %-*s  %-*s  %6d  %12.4f  %6s  %6s  %4d\n", r->record, tw, title, fw,
               r->formula, r->atoms, r->mass, charge, bonds, r->data);
    }
}

/* Number of atoms whose bonds (from the bond table) fall short of the
 * element's lowest usual valence, adjusted for the formal charge: a sign
 * that the file leaves hydrogens implicit, so that the formula and mass
 * (which count only the atoms written) are short of hydrogens. Valences:
 * B 3, C 4, N 3, O 2, P 3, S 2, halogens 1 (common practice, no source);
 * an aromatic bond counts 1.5. 0 when the record has no bond table or is a
 * radical (multiplicity > 1). */
static int open_valences(const nd_molecule *m)
{
    if (!m->has_bonds || m->multiplicity != 1 || m->natoms == 0)
        return 0;
    double *sum = calloc((size_t)m->natoms, sizeof *sum);
    if (!sum)
        return 0;
    for (int b = 0; b < m->nbonds; b++) {
        double o = m->bonds[b].order == ND_BOND_AROMATIC ? 1.5 : (double)m->bonds[b].order;
        sum[m->bonds[b].a] += o;
        sum[m->bonds[b].b] += o;
    }
    int n = 0;
    for (int i = 0; i < m->natoms; i++) {
        int z = m->z[i], q = m->formal_charge[i], v;
        switch (z) {
        case 5: v = 3 + q; break;           /* B: BH4- has 4 */
        case 6: v = 4 - (q < 0 ? -q : q); break;
        case 7: case 15: v = 3 + q; break;  /* NH4+ 4, NH2- 2 */
        case 8: case 16: v = 2 + q; break;  /* H3O+ 3, OH- 1 */
        case 9: case 17: case 35: case 53: v = 1 + q; break;
        default: v = 0; break;
        }
        if (sum[i] + 0.25 < (double)v)
            n++;
    }
    free(sum);
    return n;
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

int cmd_inspect(int argc, char **argv)
{
    inspect_options o;
    int rc = parse(argc, argv, &o);
    if (rc != 0)
        return rc < 0 ? ND_EXIT_OK : rc;

    nd_error err;
    nd_error_clear(&err);
    nd_reader *r = NULL;
    nd_molecule mol;
    nd_molecule_init(&mol);
    row *rows = NULL;
    int nrows = 0, caprows = 0, failed = 0;
    cJSON *doc = NULL, *records = NULL, *failures = NULL;
    rc = ND_EXIT_OK;

    int s = nd_reader_open(&r, o.input, o.format, &err);
    if (s != ND_OK) {
        rc = cli_error(CMD, &err);
        goto done;
    }
    if (o.json) {
        doc = cJSON_CreateObject();
        failures = cJSON_CreateArray(); /* attached to doc at the end */
        if (!doc || !failures || !cJSON_AddStringToObject(doc, "file", nd_reader_name(r)) ||
            !cJSON_AddStringToObject(doc, "format", nd_format_name(nd_reader_format(r))) ||
            !(records = cJSON_AddArrayToObject(doc, "records")))
            goto nomem;
    }
    nd_progress prog;
    nd_progress_start(&prog, "records", 0);
    for (;;) {
        s = nd_reader_next(r, &mol, &err);
        if (s == ND_END)
            break;
        if (s == ND_EINPUT) {
            failed++;
            nd_progress_finish(&prog);
            fprintf(stderr, "nadir %s: %s\n", CMD, err.msg);
            if (failures) {
                cJSON *f = cJSON_CreateObject();
                if (!f || !cJSON_AddItemToArray(failures, f) ||
                    !cJSON_AddNumberToObject(f, "record", nd_reader_record(r)) ||
                    !cJSON_AddStringToObject(f, "message", err.msg))
                    goto nomem;
            }
            continue;
        }
        if (s != ND_OK) {
            nd_progress_finish(&prog);
            rc = cli_error(CMD, &err);
            goto done;
        }
        int bondless = mol.has_bonds && mol.nbonds == 0 && mol.natoms > 1;
        int open = bondless ? 0 : open_valences(&mol);
        if (bondless) {
            nd_progress_finish(&prog);
            fprintf(stderr,
                    "nadir %s: note: %s, record %d: %d atoms and no bonds (made from XYZ?); the "
                    "open-valence check is skipped\n",
                    CMD, nd_reader_name(r), nd_reader_record(r), mol.natoms);
        }
        if (open > 0) {
            nd_progress_finish(&prog);
            fprintf(stderr,
                    "nadir %s: note: %s, record %d: %d atom%s with open valences (hydrogens left "
                    "implicit?); formula and mass count only the atoms in the file\n",
                    CMD, nd_reader_name(r), nd_reader_record(r), open, open == 1 ? "" : "s");
        }
        if (o.json) {
            cJSON *m = nd_report_molecule(&mol);
            if (!m || !cJSON_AddItemToArray(records, m)) {
                cJSON_Delete(m);
                goto nomem;
            }
            if (!cJSON_AddNumberToObject(m, "record", nd_reader_record(r)) ||
                (open > 0 && !cJSON_AddNumberToObject(m, "open_valences", open)))
                goto nomem;
        } else {
            if (nrows == caprows) {
                int cap = caprows ? 2 * caprows : 64;
                row *nr = realloc(rows, (size_t)cap * sizeof *nr);
                if (!nr)
                    goto nomem;
                rows = nr;
                caprows = cap;
            }
            row *w = &rows[nrows];
            char fbuf[256];
            nd_molecule_formula(&mol, fbuf, (int)sizeof fbuf);
            w->title = flat_copy(mol.title);
            w->formula = flat_copy(fbuf);
            if (!w->title || !w->formula) {
                free(w->title);
                free(w->formula);
                goto nomem;
            }
            w->record = nd_reader_record(r);
            w->atoms = mol.natoms;
            w->charge = mol.charge;
            w->bonds = mol.nbonds;
            w->has_bonds = mol.has_bonds;
            w->data = mol.ndata;
            w->mass = nd_molecule_mass(&mol);
        }
        nrows++;
        show_progress(&prog, r, nrows + failed);
    }
    nd_progress_finish(&prog);
    if (o.json) {
        if (!cJSON_AddNumberToObject(doc, "read", nrows) ||
            !cJSON_AddNumberToObject(doc, "failed", failed))
            goto nomem;
        if (!cJSON_AddItemToObject(doc, "failures", failures))
            goto nomem;
        failures = NULL;
        if (nd_report_write(doc, "-", &err) != ND_OK) {
            rc = cli_error(CMD, &err);
            goto done;
        }
    } else if (nrows > 0) {
        print_table(rows, nrows);
    }
    if (failed > 0) {
        fprintf(stderr, "nadir %s: %d record%s read, %d failed\n", CMD, nrows, nrows == 1 ? "" : "s",
                failed);
        rc = nrows > 0 ? ND_EXIT_PARTIAL : ND_EXIT_INPUT;
    }
    goto done;
nomem:
    rc = cli_fail(CMD, ND_ENOMEM, "out of memory");
done:
    for (int i = 0; i < nrows && rows; i++) {
        free(rows[i].title);
        free(rows[i].formula);
    }
    free(rows);
    cJSON_Delete(failures);
    cJSON_Delete(doc);
    nd_molecule_free(&mol);
    nd_reader_close(r);
    return rc;
}
