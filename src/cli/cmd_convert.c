/*
** cli/cmd_convert.c -- placeholder until 'stocktake convert' lands.
*/
#include "cli.h"

void st_help_convert(FILE *out)
{
    fprintf(out, "usage: stocktake convert ... (not available in this build yet)\n");
}

int st_cmd_convert(int argc, char **argv)
{
    (void)argc;
    (void)argv;
    fprintf(stderr, "stocktake convert: not available in this build yet\n");
    return ST_EXIT_ERROR;
}
