/*
** cli/cmd_run.c -- `stocktake run`: parse options, run the pipeline, print
** the terminal summary, choose the exit code.
*/
#include <stdlib.h>
#include <string.h>

#include "cli.h"
#include "stocktake/inventory.h"
#include "stocktake/pipeline.h"

void st_help_run(FILE *out)
{
    fprintf(out,
            "usage: stocktake run [OPTIONS] -o OUT INPUT...\n"
            "\n"
            "Check, repair and de-duplicate building footprints from every INPUT\n"
            "layer together and write the inventory.\n"
            "\n"
            "  -o, --output OUT     OUT.gpkg (layers buildings, set_aside, findings,\n"
            "                       run_info, unmapped) or OUT.geojson/.geojsonl/.csv/\n"
            "                       .shp (one file per layer: OUT.set_aside.EXT,\n"
            "                       OUT.findings.EXT, OUT.run_info.csv, OUT.unmapped.csv)\n"
            "  -r, --rules FILE...  rule files (schema, footprint thresholds, map,\n"
            "                       derive, check); see docs/rules.md\n"
            "  --crs EPSG:N         CRS of input layers that do not state one\n"
            "  -j, --threads N      worker threads (default: the number of cores); the\n"
            "                       outputs are the same for any N\n"
            "  --fail-on warn|error exit 1 when findings of that severity or worse exist\n"
            "  -q, --quiet          no progress display and no summary\n"
            "  --timings            after the run, a table of each stage's wall and\n"
            "                       CPU seconds, footprints per second and peak memory\n"
            "  -h, --help           this text\n"
            "\n"
            "INPUT: .shp, .geojson, .geojsonl, .gpkg (FILE.gpkg:LAYER for one layer).\n"
            "Without rules only the geometry stage runs, with the thresholds listed\n"
            "in docs/footprint.md and docs/neighbours.md.\n"
            "\n"
            "Every feature read ends up once in buildings (ok, repaired) or in\n"
            "set_aside (duplicate, rejected); the summary shows the balance.\n"
            "exit: 0 done; 1 done but the gate failed; 2 error, nothing written.\n");
}

typedef struct run_args {
    st_run_options opt;
    const char **inputs;
    const char **rules;
    int quiet;
    int timings;
} run_args;

static void on_progress(void *ud, const char *stage, long long done, long long total)
{
    st_progress *p = ud;
    p->label = stage;
    st_progress_update(p, done, total, done);
}

static int parse_args(int argc, char **argv, run_args *a)
{
    a->inputs = calloc((size_t)argc, sizeof *a->inputs);
    a->rules = calloc((size_t)argc, sizeof *a->rules);
    if (!a->inputs || !a->rules)
        return st_cli_usage_error("run", "out of memory");
    for (int i = 1; i < argc; i++) {
        const char *arg = argv[i];
        int has_next = i + 1 < argc;
        if ((!strcmp(arg, "-o") || !strcmp(arg, "--output")) && has_next)
            a->opt.output = argv[++i];
        else if ((!strcmp(arg, "-r") || !strcmp(arg, "--rules")) && has_next) {
            /* -r takes one or more rule files, up to the next option */
            a->rules[a->opt.nrules++] = argv[++i];
            while (i + 1 < argc && argv[i + 1][0] != '-' &&
                   st_str_ends_with_ci(argv[i + 1], ".rules"))
                a->rules[a->opt.nrules++] = argv[++i];
        } else if ((!strcmp(arg, "-j") || !strcmp(arg, "--threads")) && has_next) {
            const char *v = argv[++i];
            char *end = NULL;
            long n = strtol(v, &end, 10);
            if (!*v || *end || n < 1 || n > 64)
                return st_cli_usage_error("run", "-j takes a number of threads from 1 to 64, not '%s'",
                                          v);
            a->opt.threads = (unsigned)n;
        } else if (!strcmp(arg, "--crs") && has_next)
            a->opt.crs_override = argv[++i];
        else if (!strcmp(arg, "--fail-on") && has_next) {
            const char *v = argv[++i];
            if (!strcmp(v, "warn") || !strcmp(v, "warning"))
                a->opt.fail_on = ST_FAIL_ON_WARNING;
            else if (!strcmp(v, "error"))
                a->opt.fail_on = ST_FAIL_ON_ERROR;
            else
                return st_cli_usage_error("run", "--fail-on takes warn or error, not '%s'", v);
        } else if (!strcmp(arg, "-q") || !strcmp(arg, "--quiet"))
            a->quiet = 1;
        else if (!strcmp(arg, "--timings"))
            a->timings = 1;
        else if (arg[0] == '-' && arg[1])
            return st_cli_usage_error("run", "unknown or incomplete option '%s'", arg);
        else
            a->inputs[a->opt.ninputs++] = arg;
    }
    if (!a->opt.output)
        return st_cli_usage_error("run", "say where to write the inventory with -o OUT");
    if (!a->opt.ninputs)
        return st_cli_usage_error("run", "give at least one input layer");
    a->opt.inputs = a->inputs;
    a->opt.rules = a->rules;
    return ST_EXIT_OK;
}

static void print_summary(const st_run_result *r, const char *output)
{
    fprintf(stderr, "\n%-24s %9s %9s %9s %9s %9s\n", "layer", "read", "buildings",
            "repaired", "duplicate", "rejected");
    for (size_t l = 0; l < r->nlayers; l++) {
        const st_run_layer *L = &r->layers[l];
        int balanced = L->read == L->kept + L->duplicate + L->rejected;
        fprintf(stderr, "%-24s %9llu %9llu %9llu %9llu %9llu%s\n", L->name,
                (unsigned long long)L->read, (unsigned long long)L->kept,
                (unsigned long long)L->repaired, (unsigned long long)L->duplicate,
                (unsigned long long)L->rejected, balanced ? "" : "  UNBALANCED");
    }
    fprintf(stderr, "read = buildings + set aside (duplicate + rejected) for every layer\n");
    if (r->ncodes)
        fprintf(stderr, "\nfindings: %llu error, %llu warning, %llu note; most frequent:\n",
                (unsigned long long)r->findings[ST_SEV_ERROR],
                (unsigned long long)r->findings[ST_SEV_WARNING],
                (unsigned long long)r->findings[ST_SEV_NOTE]);
    for (size_t c = 0; c < r->ncodes && c < 10; c++)
        fprintf(stderr, "  %-28s %-8s %llu\n", r->codes[c].code,
                r->codes[c].severity == ST_SEV_ERROR ? "error"
                : r->codes[c].severity == ST_SEV_WARNING ? "warning" : "note",
                (unsigned long long)r->codes[c].count);
    if (r->nunmapped)
        fprintf(stderr, "\nunmapped source values (add map lines for these first):\n");
    for (size_t u = 0; u < r->nunmapped && u < 10; u++)
        fprintf(stderr, "  %-12s %-28s %llu\n", r->unmapped[u].field, r->unmapped[u].value,
                (unsigned long long)r->unmapped[u].count);
    fprintf(stderr, "\ngate: %s%s%s\n", r->gate_failed ? "FAILED" : "passed",
            r->gate_reason ? " -- " : "", r->gate_reason ? r->gate_reason : "");
    fprintf(stderr, "inventory: %s\n", output);
}

/* One line per stage; the bench scripts read these lines (keep the form). */
static void print_timings(const st_run_result *r)
{
    fprintf(stderr, "\n%-12s %10s %10s %14s %12s\n", "stage", "wall s", "cpu s",
            "footprints/s", "peak MB");
    for (size_t i = 0; i < r->ntimings; i++) {
        const st_run_timing *t = &r->timings[i];
        fprintf(stderr, "%-12s %10.3f %10.3f %14.0f %12.1f\n", t->stage, t->wall_s, t->cpu_s,
                t->wall_s > 0 ? (double)t->items / t->wall_s : 0.0, (double)t->peak_rss_kb / 1024.0);
    }
}

int st_cmd_run(int argc, char **argv)
{
    run_args a;
    memset(&a, 0, sizeof a);
    int rc = parse_args(argc, argv, &a);
    if (rc != ST_EXIT_OK) {
        free(a.inputs);
        free(a.rules);
        return rc;
    }
    st_progress p;
    st_progress_start(&p, "read", a.quiet);
    a.opt.progress = on_progress;
    a.opt.progress_ud = &p;
    st_buf cmd;
    st_buf_init(&cmd, 1 << 16);
    /* -j is left out of the recorded command: it changes no output. */
    for (int i = 0; i < argc; i++) {
        if ((!strcmp(argv[i], "-j") || !strcmp(argv[i], "--threads")) && i + 1 < argc) {
            i++;
            continue;
        }
        if (st_buf_printf(&cmd, "%s%s", i ? " " : "stocktake ", argv[i]) != ST_OK)
            break;
    }
    a.opt.command_line = cmd.data;
    st_diags d;
    st_diags_init(&d);
    st_run_result *res = NULL;
    st_status st = st_run_execute(&a.opt, &d, &res);
    st_progress_end(&p);
    st_cli_print_diags(&d);
    if (st != ST_OK) {
        fprintf(stderr, "stocktake run: stopped (%s); nothing was written\n", st_status_name(st));
        rc = ST_EXIT_ERROR;
    } else {
        if (!a.quiet)
            print_summary(res, a.opt.output);
        if (a.timings)
            print_timings(res);
        rc = res->gate_failed ? ST_EXIT_GATE : ST_EXIT_OK;
    }
    st_run_result_free(res);
    st_diags_free(&d);
    st_buf_free(&cmd);
    free(a.inputs);
    free(a.rules);
    return rc;
}
