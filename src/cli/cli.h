/*
** cli/cli.h -- private to the command-line tool: the subcommand table and
** what subcommands share (diagnostic printing, progress, exit codes).
**
** The CLI owns stdout, stderr and the exit code; the library never prints.
*/
#ifndef STOCKTAKE_CLI_H
#define STOCKTAKE_CLI_H

#include <signal.h>
#include <stdint.h>
#include <stdio.h>
#include "stocktake/core.h"

/* Exit codes (DESIGN.md): done; done but the quality gate failed; usage,
** input or rule error with nothing written. */
enum { ST_EXIT_OK = 0, ST_EXIT_GATE = 1, ST_EXIT_ERROR = 2 };

typedef struct st_command {
    const char *name;
    const char *summary;
    int (*main)(int argc, char **argv);   /* argv[0] is the subcommand */
    void (*help)(FILE *out);
} st_command;

int st_cmd_inspect(int argc, char **argv);
void st_help_inspect(FILE *out);
int st_cmd_convert(int argc, char **argv);
void st_help_convert(FILE *out);
int st_cmd_run(int argc, char **argv);
void st_help_run(FILE *out);
int st_cmd_lint(int argc, char **argv);
void st_help_lint(FILE *out);
int st_cmd_merge(int argc, char **argv);
void st_help_merge(FILE *out);
int st_cmd_tiles(int argc, char **argv);
void st_help_tiles(FILE *out);
int st_cmd_explain(int argc, char **argv);
void st_help_explain(FILE *out);

/* Print every diagnostic to stderr, prefixed "stocktake: " when it has no
** file. Returns the number of errors. */
size_t st_cli_print_diags(const st_diags *d);

/* A one-line progress display on stderr, only when stderr is a terminal
** and not quiet. Updates at most a few times a second. */
typedef struct st_progress {
    int active;
    const char *label;
    double last;        /* monotonic seconds of the last update */
} st_progress;

void st_progress_start(st_progress *p, const char *label, int quiet);
void st_progress_update(st_progress *p, long long done, long long total,
                        long long features);
void st_progress_end(st_progress *p);

/*
** Interrupts: after st_cli_catch_interrupts(), SIGINT, SIGTERM and SIGHUP
** only set a flag that long loops poll with st_cli_interrupted(), so a
** command can close its writer without commit (removing the temporary
** output) and then st_cli_reraise() ends the process the way the signal
** would have. The flag is the CLI's one mutable static: a signal handler
** can do nothing else safely.
*/
void st_cli_catch_interrupts(void);
int st_cli_interrupted(void);          /* the signal number, or 0 */
/* The flag itself, for a library loop that polls it (st_run_options.stop). */
const volatile sig_atomic_t *st_cli_interrupt_flag(void);
void st_cli_reraise(void);             /* no-op without a signal */

/* Parse a size such as "512M", "8G", "1.5GiB" or "1000000" (bytes; K, M,
** G, T are powers of 1024, with an optional "B" or "iB"). Returns 1 and
** sets *bytes, or 0 when 's' is not a positive size. */
int st_cli_parse_size(const char *s, uint64_t *bytes);

/* Report a usage error for subcommand 'cmd' on stderr; returns ST_EXIT_ERROR. */
int st_cli_usage_error(const char *cmd, const char *fmt, ...) ST_PRINTF(2, 3);

#endif
