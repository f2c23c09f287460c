/*
** cli/cmd_explain.c -- placeholder: 'stocktake explain' arrives with its issue.
*/
#include "cli.h"

void st_help_explain(FILE *out)
{
    fprintf(out, "usage: stocktake explain ... (not available in this build yet)\n");
}

int st_cmd_explain(int argc, char **argv)
{
    (void)argc;
    (void)argv;
    fprintf(stderr, "stocktake explain: not available in this build yet\n");
    return ST_EXIT_ERROR;
}
