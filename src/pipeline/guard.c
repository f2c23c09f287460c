/*
** pipeline/guard.c -- what a run checks before and while it reads, so that
** it never overwrites an input and never dies of an out-of-memory kill.
**
** Input:   the run's options; each feature as it is read.
** Output:  ST_OK, or an error with one diagnostic, before any output exists.
** Errors:  ST_ERR_USAGE: an output file (OUT, or for single-layer formats
**          OUT.set_aside.EXT, OUT.findings.EXT, OUT.districts.EXT,
**          OUT.run_info.csv) is one of the input files (same device and
**          inode, or the same path). ST_ERR_LIMIT: the memory estimate
**          passes the limit.
**
** Memory. A run holds every feature until it writes (the neighbour stage
** compares all layers together), so its peak grows with the input. Two
** estimates, fitted on the peak resident size (GNU time) of runs over 5 and
** 20 copies of the real extracts (docs/reliability.md):
**   before reading, from file sizes, to refuse at once what is clearly too
**   big: 64 MiB for the libraries, plus
**     GeoJSON   2 x the file (measured slope 1.4 with many attributes,
**               3.3 for the bare benchmark town: this one can be low),
**     Shapefile 6 x (.shp + .dbf) (measured 4.6),
**     GeoPackage 5 x the file (measured 4.0);
**   while reading, per feature, the one that holds the bound and errs
**     high: 768 bytes, 64 per vertex, 2 per byte of attribute text and 32
**     per attribute (measured 0.95 to 2.2 KiB a feature where this gives
**     1.1 to 3.6).
** The default limit is 75 % of physical memory or 8 GiB, whichever is less;
** --max-memory sets another.
*/
#include <errno.h>
#include <stdio.h>
#include <string.h>
#include <strings.h>
#include <sys/stat.h>
#include <unistd.h>

#include "guardInt.h"
#include "stocktake/inventory.h"

#define GUARD_BASE ((uint64_t)64 << 20)
#define GUARD_DEFAULT_CAP ((uint64_t)8 << 30)
#define GUARD_PER_FEATURE 768u
#define GUARD_PER_VERTEX 64u
#define GUARD_PER_VALUE 32u

uint64_t st_run_default_max_memory(void)
{
    long pages = sysconf(_SC_PHYS_PAGES), size = sysconf(_SC_PAGESIZE);
    if (pages <= 0 || size <= 0)
        return GUARD_DEFAULT_CAP;
    uint64_t phys = (uint64_t)pages * (uint64_t)size;
    uint64_t three_quarters = phys / 4 * 3;
    return three_quarters < GUARD_DEFAULT_CAP ? three_quarters : GUARD_DEFAULT_CAP;
}

/* Returns owned file part of a layer spec ("a.gpkg:layer" -> "a.gpkg" when
** the whole spec is not a file), as the reader splits it. */
static char *spec_file(const char *spec)
{
    struct stat st;
    const char *colon = strrchr(spec, ':');
    if (colon && stat(spec, &st) != 0)
        return st_strndup(spec, (size_t)(colon - spec));
    return st_strdup(spec);
}

/* 1 if 'a' (existing) and 'b' are the same file. */
static int same_file(const char *a, const struct stat *sa, const char *b)
{
    struct stat sb;
    if (stat(b, &sb) == 0)
        return sa->st_dev == sb.st_dev && sa->st_ino == sb.st_ino;
    return strcmp(a, b) == 0;
}

/* The extension of 'path' with its dot ("" if none), borrowed. */
static const char *extension(const char *path)
{
    const char *slash = strrchr(path, '/');
    const char *dot = strrchr(slash ? slash : path, '.');
    return dot ? dot : "";
}

static void free_list(char **list);

/* Every file the inventory may write for 'out', NULL-terminated; returns
** owned array of owned strings (free with free_list), NULL on no memory. */
static char **output_files(const char *out)
{
    static const char *const siblings[] = {"set_aside", "findings", "districts", "run_info"};
    const size_t ns = sizeof siblings / sizeof siblings[0];
    const size_t n = 1 + 2 * ns;
    char **list = st_calloc(n + 1, sizeof *list);
    const char *ext = extension(out);
    size_t stem = strlen(out) - strlen(ext);
    char *csv = st_strdup_printf("%.*s.csv", (int)stem, out);
    if (list && csv) {
        list[0] = st_strdup(out);
        for (size_t i = 0; i < ns; i++) {
            list[1 + 2 * i] = st_inventory_sibling_path(out, siblings[i]);
            list[2 + 2 * i] = st_inventory_sibling_path(csv, siblings[i]);
        }
    }
    st_free(csv);
    for (size_t i = 0; list && i < n; i++)
        if (!list[i]) {
            for (size_t k = 0; k < n; k++)
                st_free(list[k]);
            st_free(list);
            return NULL;
        }
    return list;
}

static void free_list(char **list)
{
    for (size_t i = 0; list && list[i]; i++)
        st_free(list[i]);
    st_free(list);
}

static st_status check_paths(const st_run_options *opt, st_diags *diags)
{
    char **outs = output_files(opt->output);
    st_status rc = outs ? ST_OK : ST_ERR_NOMEM;
    for (size_t i = 0; rc == ST_OK && i < opt->ninputs; i++) {
        char *in = spec_file(opt->inputs[i]);
        struct stat st;
        if (!in) {
            rc = ST_ERR_NOMEM;
            break;
        }
        for (size_t k = 0; rc == ST_OK && outs[k] && stat(in, &st) == 0; k++)
            if (same_file(in, &st, outs[k])) {
                st_loc loc = ST_LOC_FILE(in);
                rc = st_diags_add(diags, ST_SEV_ERROR, ST_ERR_USAGE, &loc,
                                  "the run would write %s over this input; "
                                  "choose another output name (inputs are never modified)",
                                  outs[k]);
            }
        st_free(in);
    }
    free_list(outs);
    return rc;
}

static uint64_t size_of(const char *path)
{
    struct stat st;
    return stat(path, &st) == 0 && S_ISREG(st.st_mode) ? (uint64_t)st.st_size : 0;
}

/* Estimated peak bytes for one input from its file sizes. */
static uint64_t input_estimate(const char *spec)
{
    char *file = spec_file(spec);
    if (!file)
        return 0;
    uint64_t bytes = size_of(file), factor = 2;
    const char *ext = extension(file);
    if (!strcasecmp(ext, ".shp")) {
        size_t stem = strlen(file) - strlen(ext);
        char *dbf = st_strdup_printf("%.*s.dbf", (int)stem, file);
        char *DBF = st_strdup_printf("%.*s.DBF", (int)stem, file);
        bytes += dbf ? size_of(dbf) : 0;
        bytes += DBF && (!dbf || !size_of(dbf)) ? size_of(DBF) : 0;
        st_free(dbf);
        st_free(DBF);
        factor = 6;
    } else if (!strcasecmp(ext, ".gpkg")) {
        factor = 5;
    }
    st_free(file);
    return bytes > UINT64_MAX / factor ? UINT64_MAX : bytes * factor;
}

/* 'b' bytes as "123 MiB" or "1.25 GiB" into buf. */
static const char *human(uint64_t b, char buf[32])
{
    if (b < ((uint64_t)1 << 30))
        snprintf(buf, 32, "%.0f MiB", (double)b / (double)(1 << 20));
    else
        snprintf(buf, 32, "%.2f GiB", (double)b / (double)((uint64_t)1 << 30));
    return buf;
}

st_status st_run_guard_start(const st_run_options *opt, st_diags *diags,
                             st_memory_budget *budget)
{
    budget->limit = opt->max_memory ? opt->max_memory : st_run_default_max_memory();
    budget->used = GUARD_BASE;
    st_status rc = check_paths(opt, diags);
    if (rc != ST_OK || opt->tile || opt->bbox)
        return rc;   /* a part holds only its window: counted as it reads */
    uint64_t need = GUARD_BASE;
    for (size_t i = 0; i < opt->ninputs; i++) {
        uint64_t e = input_estimate(opt->inputs[i]);
        need = need > UINT64_MAX - e ? UINT64_MAX : need + e;
    }
    char a[32], b[32];
    if (need > budget->limit)
        return st_diags_add(diags, ST_SEV_ERROR, ST_ERR_LIMIT, NULL,
                            "the inputs need about %s of memory (estimated from their "
                            "sizes), more than the limit of %s; nothing was read (raise "
                            "the limit with --max-memory, or split the run)",
                            human(need, a), human(budget->limit, b));
    return ST_OK;
}

uint64_t st_run_feature_estimate(const st_feature *f)
{
    uint64_t e = GUARD_PER_FEATURE + (uint64_t)GUARD_PER_VERTEX * f->geom.ncoords;
    for (uint32_t i = 0; i < f->nvalues; i++)
        if (f->values[i])
            e += GUARD_PER_VALUE + 2 * (uint64_t)strlen(f->values[i]);
    return e;
}

st_status st_run_guard_feature(st_memory_budget *budget, const st_feature *f,
                               const char *path, st_diags *diags)
{
    budget->used += st_run_feature_estimate(f);
    if (budget->used <= budget->limit)
        return ST_OK;
    st_loc loc = ST_LOC_FEATURE(path, (long long)f->index);
    char a[32], b[32];
    return st_diags_add(diags, ST_SEV_ERROR, ST_ERR_LIMIT, &loc,
                        "the features read so far need about %s of memory, more than "
                        "the limit of %s; the run stops before it runs out (raise the "
                        "limit with --max-memory, or split the run)",
                        human(budget->used, a), human(budget->limit, b));
}
