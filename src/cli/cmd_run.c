/*
** cli/cmd_run.c -- `stocktake run` and `stocktake merge` (which takes the
** same options, with parts for inputs): parse options, run the pipeline, print
** the terminal summary the library rendered (report.h), choose the exit
** code: 0 done, 1 gate failed (outputs written), 2 error (nothing written).
*/
#include <dirent.h>
#include <errno.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>

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
            "                       run_info, unmapped) or OUT.geojson/.geojsonl/.csv\n"
            "                       (one file per layer: OUT.set_aside.EXT,\n"
            "                       OUT.findings.EXT, OUT.run_info.csv, OUT.unmapped.csv);\n"
            "                       for a Shapefile, convert OUT.gpkg:buildings after\n"
            "  -r, --rules FILE...  rule files (schema, footprint thresholds, map,\n"
            "                       derive, check, defaults, gate); see docs/rules.md\n"
            "  --districts FILE     district polygons (any readable layer); each building\n"
            "                       goes to the district covering its point on surface;\n"
            "                       adds the districts layer (docs/districts.md)\n"
            "  --district-key FIELD the districts' key (default: the first field filled\n"
            "                       with a distinct value on every district)\n"
            "  --region-key FIELD   the districts' parent region, for region defaults\n"
            "  --reference CSV      expected buildings per district (columns: key, count)\n"
            "  --fill MODE          how defaults fill unknown fields: most-likely\n"
            "                       (default) or draw (from the distribution, --seed)\n"
            "  --seed N             seed of the draw (default 1)\n"
            "  -j, --threads N      worker threads (default: the number of cores); the\n"
            "                       outputs are the same for any N\n"
            "  --report DIR         write DIR/report.json and DIR/report.html (a\n"
            "                       self-contained page: map, charts, tables)\n"
            "  --crs EPSG:N         CRS of input layers that do not state one\n"
            "  --tile Z/X/Y         write a part: only the buildings whose point falls in\n"
            "                       this web-mercator tile, deciding duplicates and\n"
            "                       overlaps across its edge as a whole run would;\n"
            "                       -o PART.gpkg; finish with 'stocktake merge'\n"
            "                       (docs/scale.md)\n"
            "  --bbox W,S,E,N       the same for a lon/lat box (west <= lon < east,\n"
            "                       south <= lat < north)\n"
            "  --halo METRES        how far around the window a part reads (default\n"
            "                       500; widened by the run itself when needed)\n"
            "  --facts FILE         with --tile/--bbox: the layer facts 'stocktake tiles\n"
            "                       --facts' wrote for these inputs; a changed input is\n"
            "                       refused (exit 2), and a GeoPackage input is read\n"
            "                       through its R-tree for the window only\n"
            "  --max-memory SIZE    stop early (exit 2) rather than need more memory\n"
            "                       than SIZE (512M, 4G ...); default: 75%% of\n"
            "                       physical memory or 8G, whichever is less\n"
            "  --fail-on warn|error exit 1 when findings of that severity or worse exist\n"
            "  -q, --quiet          no progress display and no summary\n"
            "  --timings            after the run, a table of each stage's wall and\n"
            "                       CPU seconds, footprints per second and peak memory\n"
            "                       (also with -q)\n"
            "  -h, --help           this text\n"
            "\n"
            "INPUT: .shp, .geojson, .geojsonl, .gpkg (FILE.gpkg:LAYER for one layer).\n"
            "Without rules only the geometry stage runs, with the thresholds listed\n"
            "in docs/footprint.md and docs/neighbours.md.\n"
            "\n"
            "Every feature read ends up once in buildings (ok, repaired) or in\n"
            "set_aside (duplicate, rejected); the summary shows the balance.\n"
            "exit: 0 done; 1 done but the gate failed (outputs written, the report\n"
            "says which gate and by how much); 2 error, nothing written.\n");
}

typedef struct run_args {
    const char *cmd;             /* "run" or "merge" */
    st_run_options opt;
    const char **inputs;
    char **found;                /* merge: part paths found in folders, owned */
    size_t nfound;
    const char **rules;
    int quiet;
    int timings;
} run_args;

/* A whole decimal number in [0, max]; 0 if it is not one. */
static int parse_count(const char *s, unsigned long long max, unsigned long long *out)
{
    char *end = NULL;
    if (!s[0] || s[0] == '-' || s[0] == '+')
        return 0;
    errno = 0;
    unsigned long long v = strtoull(s, &end, 10);
    if (errno || *end || v > max)
        return 0;
    *out = v;
    return 1;
}

static void on_progress(void *ud, const char *stage, long long done, long long total)
{
    st_progress *p = ud;
    p->label = stage;
    st_progress_update(p, done, total, done);
}

static int by_name(const void *a, const void *b)
{
    return strcmp(*(char *const *)a, *(char *const *)b);
}

/* Append 'path' (borrowed) to the list; 0 on no memory. */
static int push_input(const char ***list, size_t *n, size_t *cap, const char *path)
{
    if (*n == *cap) {
        size_t c = *cap ? 2 * *cap : 64;
        const char **l = realloc(*list, c * sizeof *l);
        if (!l)
            return 0;
        *list = l;
        *cap = c;
    }
    (*list)[(*n)++] = path;
    return 1;
}

/* The parts in folder 'dir' (every *.gpkg not starting with '.'), in name
** order, appended to the list; their paths are kept in a->found. */
static int list_folder(run_args *a, const char *dir, const char ***out, size_t *n, size_t *cap)
{
    DIR *d = opendir(dir);
    if (!d) {
        fprintf(stderr, "stocktake merge: %s: cannot list the folder: %s\n", dir, strerror(errno));
        return 0;
    }
    size_t first = *n;
    int ok = 1;
    for (struct dirent *e; ok && (e = readdir(d)) != NULL;) {
        size_t len = strlen(e->d_name);
        if (e->d_name[0] == '.' || len < 6 || strcmp(e->d_name + len - 5, ".gpkg") != 0)
            continue;
        char **f = realloc(a->found, (a->nfound + 1) * sizeof *f);
        if (f)
            a->found = f;
        char *path = f ? malloc(strlen(dir) + len + 2) : NULL;
        if (path) {
            sprintf(path, "%s/%s", dir, e->d_name);
            a->found[a->nfound++] = path;
        }
        ok = path && push_input(out, n, cap, path);
    }
    closedir(d);
    if (ok && *n - first > 1)
        qsort(*out + first, *n - first, sizeof **out, by_name);
    return ok;
}

/* merge: a folder among the inputs stands for the parts in it, so that
** tens of thousands of parts need not go on one command line. Returns 0
** (after a message) when a folder cannot be listed or memory runs out. */
static int expand_folders(run_args *a)
{
    const char **out = NULL;
    size_t n = 0, cap = 0;
    int ok = 1;
    for (size_t i = 0; ok && i < a->opt.ninputs; i++) {
        struct stat st;
        const char *in = a->inputs[i];
        if (stat(in, &st) == 0 && S_ISDIR(st.st_mode))
            ok = list_folder(a, in, &out, &n, &cap);
        else
            ok = push_input(&out, &n, &cap, in);
    }
    if (!ok) {
        free(out);
        return 0;
    }
    free(a->inputs);
    a->inputs = out;
    a->opt.ninputs = n;
    return 1;
}

static int parse_args(int argc, char **argv, run_args *a)
{
    a->inputs = calloc((size_t)argc, sizeof *a->inputs);
    a->rules = calloc((size_t)argc, sizeof *a->rules);
    if (!a->inputs || !a->rules)
        return st_cli_usage_error(a->cmd, "out of memory");
    a->opt.seed = 1;
    a->opt.threads = 0;   /* the online cores (pipeline/pool.c) */
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
        } else if (!strcmp(arg, "--report") && has_next)
            a->opt.report_dir = argv[++i];
        else if (!strcmp(arg, "--crs") && has_next)
            a->opt.crs_override = argv[++i];
        else if (!strcmp(arg, "--districts") && has_next)
            a->opt.districts = argv[++i];
        else if (!strcmp(arg, "--district-key") && has_next)
            a->opt.district_key = argv[++i];
        else if (!strcmp(arg, "--region-key") && has_next)
            a->opt.region_key = argv[++i];
        else if (!strcmp(arg, "--reference") && has_next)
            a->opt.reference = argv[++i];
        else if (!strcmp(arg, "--fill") && has_next) {
            const char *v = argv[++i];
            if (!strcmp(v, "most-likely"))
                a->opt.fill = ST_FILL_MOST_LIKELY;
            else if (!strcmp(v, "draw"))
                a->opt.fill = ST_FILL_DRAW;
            else
                return st_cli_usage_error(a->cmd, "--fill takes most-likely or draw, not '%s'", v);
        } else if (!strcmp(arg, "--seed") && has_next) {
            unsigned long long v = 0;
            if (!parse_count(argv[++i], UINT64_MAX, &v))
                return st_cli_usage_error(a->cmd, "--seed takes a whole number, not '%s'", argv[i]);
            a->opt.seed = v;
        } else if ((!strcmp(arg, "-j") || !strcmp(arg, "--threads")) && has_next) {
            unsigned long long v = 0;
            if (!parse_count(argv[++i], ST_PLACE_MAX_THREADS, &v) || v == 0)
                return st_cli_usage_error(a->cmd, "-j takes a number of threads from 1 to %d, "
                                          "not '%s'", ST_PLACE_MAX_THREADS, argv[i]);
            a->opt.threads = (unsigned)v;
        } else if (!strcmp(arg, "--max-memory") && has_next) {
            if (!st_cli_parse_size(argv[++i], &a->opt.max_memory))
                return st_cli_usage_error(a->cmd, "--max-memory takes a size such as "
                                          "512M or 4G, not '%s'", argv[i]);
        }
        else if (!strcmp(arg, "--fail-on") && has_next) {
            const char *v = argv[++i];
            if (!strcmp(v, "warn") || !strcmp(v, "warning"))
                a->opt.fail_on = ST_FAIL_ON_WARNING;
            else if (!strcmp(v, "error"))
                a->opt.fail_on = ST_FAIL_ON_ERROR;
            else
                return st_cli_usage_error(a->cmd, "--fail-on takes warn or error, not '%s'", v);
        } else if (!strcmp(arg, "--tile") && has_next && !strcmp(a->cmd, "run"))
            a->opt.tile = argv[++i];
        else if (!strcmp(arg, "--bbox") && has_next && !strcmp(a->cmd, "run"))
            a->opt.bbox = argv[++i];
        else if (!strcmp(arg, "--facts") && has_next && !strcmp(a->cmd, "run"))
            a->opt.facts = argv[++i];
        else if (!strcmp(arg, "--halo") && has_next && !strcmp(a->cmd, "run")) {
            char *end = NULL;
            a->opt.halo_m = strtod(argv[++i], &end);
            if (!*argv[i] || *end || !(a->opt.halo_m > 0) || a->opt.halo_m > 1e6)
                return st_cli_usage_error(a->cmd, "--halo takes metres between 0 and 1000000, "
                                          "not '%s'", argv[i]);
        } else if (!strcmp(arg, "--timings"))
            a->timings = 1;
        else if (!strcmp(arg, "-q") || !strcmp(arg, "--quiet"))
            a->quiet = 1;
        else if (arg[0] == '-' && arg[1])
            return st_cli_usage_error(a->cmd, "unknown or incomplete option '%s'", arg);
        else
            a->inputs[a->opt.ninputs++] = arg;
    }
    if (!a->opt.output)
        return st_cli_usage_error(a->cmd, "say where to write the inventory with -o OUT");
    /* set_aside holds null, point and polygon geometries alike, which one
    ** Shapefile cannot: refuse before reading anything. */
    if (st_str_ends_with_ci(a->opt.output, ".shp"))
        return st_cli_usage_error(a->cmd, "a Shapefile holds one geometry type, but the "
                                  "inventory's set_aside layer mixes them: write .gpkg, "
                                  ".geojson, .geojsonl or .csv, then 'stocktake convert "
                                  "OUT.gpkg:buildings OUT.shp'");
    if (!a->opt.ninputs)
        return st_cli_usage_error(a->cmd, !strcmp(a->cmd, "merge") ? "give the parts to merge"
                                                                   : "give at least one input layer");
    if ((a->opt.tile || a->opt.bbox) && !st_str_ends_with_ci(a->opt.output, ".gpkg"))
        return st_cli_usage_error(a->cmd, "a part (--tile, --bbox) is a GeoPackage: "
                                  "-o PART.gpkg");
    if (a->opt.halo_m > 0 && !a->opt.tile && !a->opt.bbox)
        return st_cli_usage_error(a->cmd, "--halo goes with --tile or --bbox");
    if (a->opt.facts && !a->opt.tile && !a->opt.bbox)
        return st_cli_usage_error(a->cmd, "--facts goes with --tile or --bbox");
    if ((a->opt.district_key || a->opt.region_key || a->opt.reference) && !a->opt.districts)
        return st_cli_usage_error(a->cmd, "--district-key, --region-key and --reference "
                                         "need --districts");
    if (!strcmp(a->cmd, "merge") && !expand_folders(a))
        return ST_EXIT_ERROR;
    a->opt.inputs = a->inputs;
    a->opt.rules = a->rules;
    return ST_EXIT_OK;
}

/* One line per stage; the bench scripts read these lines (keep the form). */
static void print_timings(const st_run_result *r)
{
    fprintf(stderr, "\n%-16s %10s %10s %14s %12s\n", "stage", "wall s", "cpu s",
            "footprints/s", "peak MB");
    for (size_t i = 0; i < r->ntimings; i++) {
        const st_run_timing *t = &r->timings[i];
        char rate[32] = "-";   /* not for stages too short to time or without features */
        if (t->items && t->wall_s >= 0.001)
            snprintf(rate, sizeof rate, "%.0f", (double)t->items / t->wall_s);
        fprintf(stderr, "%-16s %10.3f %10.3f %14s %12.1f\n", t->stage, t->wall_s, t->cpu_s, rate,
                (double)t->peak_rss_kb / 1024.0);
    }
}

static int run_or_merge(const char *cmdname, int argc, char **argv)
{
    run_args a;
    memset(&a, 0, sizeof a);
    a.cmd = cmdname;
    int rc = parse_args(argc, argv, &a);
    if (rc != ST_EXIT_OK) {
        free(a.inputs);
        free(a.rules);
        for (size_t i = 0; i < a.nfound; i++)
            free(a.found[i]);
        free(a.found);
        return rc;
    }
    st_progress p;
    st_progress_start(&p, "read", a.quiet);
    a.opt.progress = on_progress;
    a.opt.progress_ud = &p;
    st_buf cmd;
    st_buf_init(&cmd, 1 << 16);
    /* -j and --timings are left out of the recorded command: they change
    ** no output, and the outputs of any -j are to be byte-identical. */
    for (int i = 0; i < argc; i++) {
        if ((!strcmp(argv[i], "-j") || !strcmp(argv[i], "--threads")) && i + 1 < argc) {
            i++;
            continue;
        }
        if (!strcmp(argv[i], "--timings"))
            continue;
        if (st_buf_printf(&cmd, "%s%s", i ? " " : "stocktake ", argv[i]) != ST_OK)
            break;
    }
    a.opt.command_line = cmd.data;
    st_diags d;
    st_diags_init(&d);
    st_run_result *res = NULL;
    int merge = !strcmp(cmdname, "merge");
    st_cli_catch_interrupts();
    a.opt.stop = st_cli_interrupt_flag();
    st_status st = merge ? st_run_merge(&a.opt, &d, &res) : st_run_execute(&a.opt, &d, &res);
    st_progress_end(&p);
    st_cli_print_diags(&d);
    if (st == ST_ERR_STOPPED) {   /* the diagnostic said so */
        st_cli_reraise();   /* ends the process as the signal would have */
        rc = ST_EXIT_ERROR;
    } else if (st != ST_OK) {
        fprintf(stderr, "stocktake %s: stopped (%s); nothing was written\n", cmdname,
                st_status_name(st));
        rc = ST_EXIT_ERROR;
    } else {
        if (!a.quiet && res->summary)
            fputs(res->summary, stderr);
        if (!a.quiet && (a.opt.tile || a.opt.bbox))
            fprintf(stderr, "stocktake run: part written to %s; finish the job with "
                    "'stocktake merge' over all the parts\n", a.opt.output);
        if (a.timings)
            print_timings(res);
        rc = res->gate_failed ? ST_EXIT_GATE : ST_EXIT_OK;
    }
    st_run_result_free(res);
    st_diags_free(&d);
    st_buf_free(&cmd);
    free(a.inputs);
    free(a.rules);
    for (size_t i = 0; i < a.nfound; i++)
        free(a.found[i]);
    free(a.found);
    return rc;
}

int st_cmd_run(int argc, char **argv)
{
    return run_or_merge("run", argc, argv);
}

int st_cmd_merge(int argc, char **argv)
{
    return run_or_merge("merge", argc, argv);
}

void st_help_merge(FILE *out)
{
    fprintf(out,
            "usage: stocktake merge [OPTIONS] -o OUT PART|FOLDER...\n"
            "\n"
            "Finish a job split into windows: combine the parts that 'stocktake run\n"
            "--tile' or '--bbox' wrote into one inventory and report, the same as a\n"
            "single run over the whole layer would give (docs/scale.md).\n"
            "\n"
            "OPTIONS are those of 'stocktake run' (-o, -r, --districts, --district-key,\n"
            "--region-key, --reference, --fill, --seed, --report, --fail-on, -j, -q,\n"
            "--timings, --max-memory) and must name the same rules, districts,\n"
            "reference and fill options the parts were made with: each part records\n"
            "them and merge refuses a part made otherwise. The parts must together\n"
            "hold every feature of every input layer once. A FOLDER stands for\n"
            "every .gpkg in it (names starting with '.' left out).\n"
            "\n"
            "exit: 0 done; 1 the gate failed; 2 error, nothing written.\n");
}
