/*
** cli/cmd_explain.c -- `stocktake explain [--json] OUT BID`: where each
** value of one building came from. The library (explain.h) finds and
** renders the building; this file parses the arguments and prints.
**
** Exit: 0 shown; 2 usage error, no such file, not a stocktake output, or
** no such bid (the message says which), with nothing on stdout.
*/
#include <errno.h>
#include <stdlib.h>
#include <string.h>

#include "cli.h"
#include "stocktake/explain.h"

void st_help_explain(FILE *out)
{
    fprintf(out,
            "usage: stocktake explain [--json] OUT BID\n"
            "\n"
            "Show one building of a run's output: its status (or, when it was set\n"
            "aside, why, and which building it duplicates), its measures, flags and\n"
            "district; each schema field with its value, its provenance (source,\n"
            "derived, default, drawn or unknown) and the rule (file:line) that set\n"
            "it, with that line of the rule file when the file is still at that\n"
            "path; its filled source attributes; and its findings.\n"
            "\n"
            "OUT is the output of 'stocktake run': OUT.gpkg, or OUT.geojson /\n"
            "OUT.geojsonl with OUT.set_aside.EXT and OUT.findings.EXT beside it.\n"
            "(Shapefile and CSV outputs are not read: their column names are cut\n"
            "or untyped.) BID is the building's bid column.\n"
            "\n"
            "  --json      one JSON object on stdout instead of text\n"
            "  -h, --help  this text\n"
            "\n"
            "exit: 0 shown; 2 usage error, no such file, not a stocktake output,\n"
            "or no such bid.\n");
}

/* A bid: decimal digits only, at least 1. */
static int parse_bid(const char *s, uint64_t *out)
{
    if (!s[0] || strspn(s, "0123456789") != strlen(s))
        return 0;
    errno = 0;
    unsigned long long v = strtoull(s, NULL, 10);
    if (errno || v == 0)
        return 0;
    *out = (uint64_t)v;
    return 1;
}

int st_cmd_explain(int argc, char **argv)
{
    int json = 0;
    const char *pos[2] = {NULL, NULL};
    int npos = 0;
    for (int i = 1; i < argc; i++) {
        if (!strcmp(argv[i], "--json"))
            json = 1;
        else if (argv[i][0] == '-' && argv[i][1] && strcmp(argv[i], "--"))
            return st_cli_usage_error("explain", "unknown option '%s'", argv[i]);
        else if (strcmp(argv[i], "--") && npos < 2)
            pos[npos++] = argv[i];
        else if (strcmp(argv[i], "--"))
            return st_cli_usage_error("explain", "one output and one bid, not '%s' too",
                                      argv[i]);
    }
    if (npos < 2)
        return st_cli_usage_error("explain", "give the run's output and a bid: "
                                             "stocktake explain OUT.gpkg BID");
    uint64_t bid = 0;
    if (!parse_bid(pos[1], &bid))
        return st_cli_usage_error("explain", "a bid is a whole number from 1 up, not '%s'",
                                  pos[1]);
    st_diags d;
    st_diags_init(&d);
    st_explanation *e = NULL;
    st_status st = st_explain_load(pos[0], bid, &d, &e);
    st_cli_print_diags(&d);
    st_diags_free(&d);
    if (st != ST_OK)
        return ST_EXIT_ERROR;
    st_buf out;
    st_buf_init(&out, 0);
    st = json ? st_explain_render_json(e, &out) : st_explain_render_text(e, &out);
    if (st == ST_OK)
        fputs(out.data, stdout);
    else
        fprintf(stderr, "stocktake explain: cannot render the building (%s)\n",
                st_status_name(st));
    st_buf_free(&out);
    st_explanation_free(e);
    return st == ST_OK ? ST_EXIT_OK : ST_EXIT_ERROR;
}
