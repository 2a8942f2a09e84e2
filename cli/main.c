/* nadir: the program. Finds the command named by the first argument and
 * hands it the rest; each command lives in its own cli/cmd_*.c. */
#include "cli/cli.h"

#include <stdio.h>
#include <string.h>

typedef struct {
    const char *word;
    int (*fn)(int, char **);
    const char *summary;
} command;

static const command COMMANDS[] = {
#define COMMAND(word, fn, summary) {word, fn, summary},
#include "cli/commands.h"
#undef COMMAND
};

static void print_help(FILE *f)
{
    fprintf(f,
            "nadir %s: relaxed, ranked, verified conformers from a learned potential\n\n"
            "usage: nadir COMMAND [options] [files]\n"
            "       nadir COMMAND --help     options and examples of one command\n"
            "       nadir --version\n\ncommands:\n",
            ND_VERSION);
    for (size_t i = 0; i < sizeof COMMANDS / sizeof COMMANDS[0]; i++)
        fprintf(f, "  %-12s %s\n", COMMANDS[i].word, COMMANDS[i].summary);
    fprintf(f, "\nfiles: .xyz (multi-frame), .sdf/.sd/.mol (MDL V2000; V3000 read), .smi (SMILES);\n"
               "       '-' is standard input or output.\n"
               "\nexit codes:\n"
               "  0  success\n"
               "  1  internal error (out of memory)\n"
               "  2  usage error (bad command line)\n"
               "  3  input error (unreadable or invalid file, element or charge outside the model)\n"
               "  4  computation failed (no convergence, non-finite values, external program failed)\n"
               "  5  finished, but some records failed (each reported on stderr)\n");
}

int main(int argc, char **argv)
{
    if (argc < 2) {
        print_help(stderr);
        return ND_EXIT_USAGE;
    }
    const char *word = argv[1];
    if (strcmp(word, "help") == 0 && argc >= 3) { /* nadir help COMMAND = nadir COMMAND --help */
        for (size_t i = 0; i < sizeof COMMANDS / sizeof COMMANDS[0]; i++)
            if (strcmp(argv[2], COMMANDS[i].word) == 0) {
                char *args[] = {argv[2], "--help", NULL};
                return COMMANDS[i].fn(2, args);
            }
        fprintf(stderr, "nadir: unknown command '%s' (see: nadir --help)\n", argv[2]);
        return ND_EXIT_USAGE;
    }
    if (strcmp(word, "--help") == 0 || strcmp(word, "-h") == 0 || strcmp(word, "help") == 0) {
        print_help(stdout);
        return ND_EXIT_OK;
    }
    if (strcmp(word, "--version") == 0) {
        printf("nadir %s\n", ND_VERSION);
        return ND_EXIT_OK;
    }
    for (size_t i = 0; i < sizeof COMMANDS / sizeof COMMANDS[0]; i++)
        if (strcmp(word, COMMANDS[i].word) == 0)
            return COMMANDS[i].fn(argc - 1, argv + 1);
    fprintf(stderr, "nadir: unknown command '%s' (see: nadir --help)\n", word);
    return ND_EXIT_USAGE;
}
