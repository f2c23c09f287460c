/*
** cli/cmd_run.c -- placeholder: 'stocktake run' arrives with its issue.
*/
#include "cli.h"

void st_help_run(FILE *out)
{
    fprintf(out, "usage: stocktake run ... (not available in this build yet)\n");
}

int st_cmd_run(int argc, char **argv)
{
    (void)argc;
    (void)argv;
    fprintf(stderr, "stocktake run: not available in this build yet\n");
    return ST_EXIT_ERROR;
}
