/*
** cli/main.c -- entry point: global options and the subcommand table.
*/
#include <signal.h>
#include <string.h>

#include "cli.h"

static const st_command commands[] = {
    {"inspect", "profile layers: count, geometry types, CRS, extent, fields",
     st_cmd_inspect, st_help_inspect},
    {"convert", "convert a layer to another format (by the output's extension)",
     st_cmd_convert, st_help_convert},
    {"run", "check, repair, place, harmonise and audit footprints",
     st_cmd_run, st_help_run},
    {"tiles", "list the tiles a job too large for one run splits into",
     st_cmd_tiles, st_help_tiles},
    {"merge", "combine the parts of a job run by tiles into one inventory",
     st_cmd_merge, st_help_merge},
    {"lint", "check rule files without data", st_cmd_lint, st_help_lint},
    {"explain", "show where each value of one building came from",
     st_cmd_explain, st_help_explain},
};

#define NCOMMANDS (sizeof commands / sizeof commands[0])

static void usage(FILE *out)
{
    fprintf(out,
            "usage: stocktake COMMAND [OPTIONS] ...\n"
            "\n"
            "Turn raw building-footprint layers into a clean, attributed\n"
            "inventory and a quality report.\n"
            "\n"
            "commands:\n");
    for (size_t i = 0; i < NCOMMANDS; i++)
        fprintf(out, "  %-9s %s\n", commands[i].name, commands[i].summary);
    fprintf(out,
            "\n"
            "  stocktake COMMAND --help   options of one command\n"
            "  stocktake --version        version and library versions\n"
            "\n"
            "exit codes: 0 done; 1 done but the quality gate failed;\n"
            "            2 usage, input or rule error (nothing written)\n");
}

static void version(void);

int main(int argc, char **argv)
{
    /* A file-size limit (ulimit -f) must make a write fail with EFBIG,
    ** which every writer reports and cleans up after, not kill the
    ** process with SIGXFSZ and leave a half-written temporary file. */
    signal(SIGXFSZ, SIG_IGN);
    if (argc < 2) {
        usage(stderr);
        return ST_EXIT_ERROR;
    }
    if (!strcmp(argv[1], "--help") || !strcmp(argv[1], "-h") || !strcmp(argv[1], "help")) {
        if (argc > 2)
            for (size_t i = 0; i < NCOMMANDS; i++)
                if (!strcmp(argv[2], commands[i].name)) {
                    commands[i].help(stdout);
                    return ST_EXIT_OK;
                }
        usage(stdout);
        return ST_EXIT_OK;
    }
    if (!strcmp(argv[1], "--version") || !strcmp(argv[1], "-V")) {
        version();
        return ST_EXIT_OK;
    }
    for (size_t i = 0; i < NCOMMANDS; i++) {
        if (strcmp(argv[1], commands[i].name) != 0)
            continue;
        for (int k = 2; k < argc; k++) {
            if (!strcmp(argv[k], "--"))
                break;
            if (!strcmp(argv[k], "--help") || !strcmp(argv[k], "-h")) {
                commands[i].help(stdout);
                return ST_EXIT_OK;
            }
        }
        return commands[i].main(argc - 1, argv + 1);
    }
    fprintf(stderr, "stocktake: unknown command '%s'\n\n", argv[1]);
    usage(stderr);
    return ST_EXIT_ERROR;
}

#include <geos_c.h>
#include <pcre2.h>
#include <proj.h>
#include <sqlite3.h>

static void version(void)
{
    PJ_INFO pj = proj_info();
    printf("stocktake %s\n", ST_VERSION);
    printf("  GEOS %s, PROJ %s, SQLite %s\n", GEOSversion(), pj.release ? pj.release : "?",
           sqlite3_libversion());
}
