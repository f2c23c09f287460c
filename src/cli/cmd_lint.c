/*
** cli/cmd_lint.c -- 'stocktake lint RULES...': load rule files as one set
** (as 'run -r' would) and report every problem without reading any data.
**
** Input:   rule file paths.
** Output:  diagnostics on stderr ("file:line:col: error: ...", the line and
**          a caret), then one summary line on stderr.
** Exit:    2 on any error (or a file that cannot be read), else 0, also
**          when there are warnings.
*/
#include <stdlib.h>
#include <string.h>

#include "cli.h"
#include "stocktake/defaults.h"
#include "stocktake/rules.h"

void st_help_lint(FILE *out)
{
    fprintf(out,
            "usage: stocktake lint [--quiet] RULES...\n"
            "\n"
            "Check rule files as one set, the way 'stocktake run -r' loads them:\n"
            "syntax, unknown fields (with suggestions), values outside the schema,\n"
            "map lines that can never apply, regular expressions that do not\n"
            "compile, include cycles, default shares that do not add up to 100%%,\n"
            "and the content of defaults tables (columns, fields, values, shares).\n"
            "\n"
            "  -q, --quiet   print only the summary line\n"
            "\n"
            "exit codes: 0 no errors (warnings allowed); 2 errors\n"
            "The language is described in docs/rules.md.\n");
}

/* Diagnostics in the order of the text: file (first seen first), line,
** column, then the order they were found in. */
typedef struct placed {
    st_diag g;
    size_t file_rank, order;
} placed;

static int by_place(const void *a, const void *b)
{
    const placed *x = a, *y = b;
    if (x->file_rank != y->file_rank)
        return x->file_rank < y->file_rank ? -1 : 1;
    if (x->g.line != y->g.line)
        return x->g.line < y->g.line ? -1 : 1;
    if (x->g.col != y->g.col)
        return x->g.col < y->g.col ? -1 : 1;
    return x->order < y->order ? -1 : x->order > y->order;
}

/* Print 'd' sorted by place (falls back to the found order without memory). */
static void print_sorted(const st_diags *d)
{
    placed *p = malloc((d->count ? d->count : 1) * sizeof *p);
    st_diag *items = malloc((d->count ? d->count : 1) * sizeof *items);
    if (!p || !items) {
        free(p);
        free(items);
        st_cli_print_diags(d);
        return;
    }
    for (size_t i = 0; i < d->count; i++) {
        p[i].g = d->items[i];
        p[i].order = i;
        p[i].file_rank = i;
        for (size_t k = 0; k < i; k++)
            if ((!d->items[k].file && !d->items[i].file) ||
                (d->items[k].file && d->items[i].file &&
                 !strcmp(d->items[k].file, d->items[i].file))) {
                p[i].file_rank = p[k].file_rank;
                break;
            }
    }
    qsort(p, d->count, sizeof *p, by_place);
    for (size_t i = 0; i < d->count; i++)
        items[i] = p[i].g;
    st_diags view = *d;   /* shares the strings; only the order differs */
    view.items = items;
    st_cli_print_diags(&view);
    free(items);
    free(p);
}

int st_cmd_lint(int argc, char **argv)
{
    int quiet = 0;
    const char **paths = NULL;
    size_t n = 0;
    int first = 1;
    for (; first < argc; first++) {
        if (!strcmp(argv[first], "--")) {
            first++;
            break;
        }
        if (!strcmp(argv[first], "-q") || !strcmp(argv[first], "--quiet"))
            quiet = 1;
        else if (argv[first][0] == '-' && argv[first][1])
            return st_cli_usage_error("lint", "unknown option '%s'", argv[first]);
        else
            break;
    }
    if (first >= argc)
        return st_cli_usage_error("lint", "no rule file given");
    paths = (const char **)(argv + first);
    n = (size_t)(argc - first);

    st_diags diags;
    st_diags_init(&diags);
    st_rules *rules = NULL;
    st_status rc = st_rules_load(paths, n, &diags, &rules);
    if (rc == ST_OK) {
        /* The defaults stage reads the tables: the same check as a run's,
        ** for no district in particular. */
        st_defaults *d = NULL;
        st_defaults_places none = {NULL, NULL, 0};
        rc = st_defaults_new(rules, &none, &diags, &d);
        st_defaults_free(d);
    }
    if (!quiet)
        print_sorted(&diags);
    if (rc == ST_ERR_NOMEM)
        fprintf(stderr, "stocktake lint: out of memory\n");
    size_t errors = diags.errors + (rc != ST_OK && diags.errors == 0 ? 1 : 0);
    fprintf(stderr, "lint: %zu file%s, %zu error%s, %zu warning%s\n", n, n == 1 ? "" : "s",
            errors, errors == 1 ? "" : "s", diags.warnings, diags.warnings == 1 ? "" : "s");
    st_rules_free(rules);
    st_diags_free(&diags);
    return rc == ST_OK ? ST_EXIT_OK : ST_EXIT_ERROR;
}
