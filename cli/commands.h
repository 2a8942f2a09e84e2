/* The command table: one line per command, kept in the order `nadir --help`
 * lists them. COMMAND(word, function, one-line summary).
 * Adding a command: write cli/cmd_WORD.c defining `int cmd_WORD(int argc,
 * char **argv)` and add its line here. */
