/*
** cli/cmd_inspect.c -- placeholder until 'stocktake inspect' lands.
*/
#include "cli.h"

void st_help_inspect(FILE *out)
{
    fprintf(out, "usage: stocktake inspect ... (not available in this build yet)\n");
}

int st_cmd_inspect(int argc, char **argv)
{
    (void)argc;
    (void)argv;
    fprintf(stderr, "stocktake inspect: not available in this build yet\n");
    return ST_EXIT_ERROR;
}
