/*
** cli/cmd_lint.c -- placeholder: 'stocktake lint' arrives with its issue.
*/
#include "cli.h"

void st_help_lint(FILE *out)
{
    fprintf(out, "usage: stocktake lint ... (not available in this build yet)\n");
}

int st_cmd_lint(int argc, char **argv)
{
    (void)argc;
    (void)argv;
    fprintf(stderr, "stocktake lint: not available in this build yet\n");
    return ST_EXIT_ERROR;
}
