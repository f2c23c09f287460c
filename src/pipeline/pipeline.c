/*
** pipeline/pipeline.c -- one run, stage after stage, data flowing one way:
** read -> footprint -> neighbours -> place -> rules (map, derive, check)
** -> defaults -> audit -> write (inventory, then the report).
**
** Input:  st_run_options (input layers, output path, rules, districts,
**         reference counts, fill mode and seed, gate threshold).
** Output: the inventory (inventory.h) and an st_run_result with the
**         balance per layer and the findings per code.
** Errors: any input or output error stops the run before anything is
**         renamed into place (diagnostics say where); findings never do.
** Memory: every feature is held until the inventory is written, because
**         the neighbour stage needs all layers together; pipeline/guard.c
**         keeps that under the run's memory limit and refuses an output
**         that would overwrite an input, before anything is read. Each
**         feature is made compact after reading (coordinates trimmed,
**         attributes packed: docs/performance.md, memory per footprint).
** Threads: the per-feature stages (footprint checks, neighbour scans,
**         rules, defaults) run on a pool of opt->threads workers (pool.c) over fixed
**         chunks of ST_POOL_CHUNK features; each chunk's findings, pairs and
**         diagnostics are kept apart and merged in chunk order, so the
**         outputs are the same for any number of threads. Reading, exact
**         duplicates, the index, the audit and writing stay in the calling
**         thread; placement has threads of its own (place.h).
** Timings: each stage's wall and CPU seconds and the peak memory so far go
**         into st_run_result.timings (run --timings, bench/stages.sh).
*/
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/resource.h>
#include <time.h>

#include "stocktake/audit.h"
#include "stocktake/defaults.h"
#include "stocktake/footprint.h"
#include "stocktake/geomx.h"
#include "stocktake/inventory.h"
#include "stocktake/io.h"
#include "stocktake/neighbours.h"
#include "stocktake/pipeline.h"
#include "stocktake/place.h"
#include "guardInt.h"
#include "stocktake/report.h"
#include "stocktake/rules.h"
#include "pipelineInt.h"

typedef struct run_state {
    const st_run_options *opt;
    st_diags *diags;
    st_feature **features;       /* every feature read, in read order */
    size_t nfeatures, capfeatures;
    st_fields *fields;           /* per layer, copied from its reader */
    st_run_result *res;
    st_findings findings;
    st_geos *gx;
    st_rules *rules;             /* NULL without -r */
    st_footprint_config fcfg;
    st_neighbours_config ncfg;
    unsigned threads;            /* workers of the per-feature stages */
    st_memory_budget budget;     /* --max-memory and the estimate so far */
    char started[32];            /* UTC, ISO 8601 */
    st_report_dist dist;         /* kept buildings, filled while writing */
    st_districts *districts;     /* --districts, or NULL */
    st_reference *reference;     /* --reference, or NULL */
    st_defaults *defaults;       /* with rules */
    st_unmapped *unmapped;       /* with rules: unmapped source values */
} run_state;

/* The files a run read, hashed for the report (role and path per entry). */
typedef struct report_files {
    st_report_file *items;
    size_t count, cap;
    char **paths;                /* owned copies the items point into */
} report_files;

static void progress(run_state *s, const char *stage, long long done, long long total)
{
    if (s->opt->progress)
        s->opt->progress(s->opt->progress_ud, stage, done, total);
}

static st_status push_feature(run_state *s, st_feature *f)
{
    if (s->nfeatures == s->capfeatures) {
        size_t cap = s->capfeatures ? s->capfeatures * 2 : 1024;
        st_feature **a = st_realloc(s->features, cap * sizeof *a);
        if (!a)
            return ST_ERR_NOMEM;
        s->features = a;
        s->capfeatures = cap;
    }
    s->features[s->nfeatures++] = f;
    return ST_OK;
}

/* A layer name unique in this run: the reader's name, then _2, _3 ... */
static char *unique_layer_name(run_state *s, size_t upto, const char *base)
{
    for (int k = 1;; k++) {
        char *name = k == 1 ? st_strdup(base) : st_strdup_printf("%s_%d", base, k);
        if (!name)
            return NULL;
        size_t i = 0;
        while (i < upto && strcmp(s->res->layers[i].name, name) != 0)
            i++;
        if (i == upto)
            return name;
        st_free(name);
    }
}

/* Give back what the geometry builder over-allocated (it doubles its
** arrays): every feature is held until the write, so the slack of a
** million coordinate arrays adds up (docs/performance.md, memory). */
static void trim_geometry(st_geom *g)
{
    if (g->xy && g->cap_coords > g->ncoords && g->ncoords > 0) {
        double *xy = st_realloc(g->xy, 2 * (size_t)g->ncoords * sizeof *xy);
        if (xy) {
            g->xy = xy;
            g->cap_coords = g->ncoords;
        }
    }
}

/* GeoJSON types a field by its first value: a later "PB+2" in a field that
** began with 2 makes it text, so that the inventory does not declare a
** number column for it (GDAL reads such a value back as 0). 'first' is the
** layer's first feature. */
static void demote_numeric_fields(run_state *s, size_t l, size_t first)
{
    st_fields *fl = &s->fields[l];
    for (size_t i = first; i < s->nfeatures; i++) {
        const st_feature *f = s->features[i];
        for (uint32_t k = 0; k < f->nvalues && k < fl->count; k++) {
            st_field *fd = &fl->items[k];
            const char *v = f->values[k];
            if ((fd->type != ST_FIELD_INTEGER && fd->type != ST_FIELD_REAL) || !v || !*v)
                continue;
            char *end;
            (void)strtod(v, &end);
            if (*end) {
                fd->type = ST_FIELD_TEXT;
                fd->width = 0;
            }
        }
    }
}

static st_status read_layer(run_state *s, size_t l)
{
    size_t first = s->nfeatures;
    st_read_options ro = ST_READ_OPTIONS_DEFAULT;
    ro.crs_override = s->opt->crs_override;
    st_reader *r = NULL;
    st_status rc = st_reader_open(s->opt->inputs[l], &ro, s->diags, &r);
    if (rc != ST_OK)
        return rc;
    st_run_layer *L = &s->res->layers[l];
    for (;;) {
        st_feature *f = NULL;
        rc = st_reader_next(r, &f);
        if (rc != ST_OK || !f)
            break;
        f->layer = (uint32_t)l;
        f->bid = (uint64_t)s->nfeatures + 1;
        trim_geometry(&f->geom);
        /* A feature without an id of its own (a GeoJSON feature with no
        ** "id") is known by its 0-based position in the layer. */
        if (!f->source_id &&
            !(f->source_id = st_strdup_printf("%llu", (unsigned long long)f->index)))
            rc = ST_ERR_NOMEM;
        if (rc == ST_OK)
            rc = st_feature_pack_values(f);   /* one block: memory */
        if (rc == ST_OK)
            rc = st_run_guard_feature(&s->budget, f, st_reader_path(r), s->diags);
        if (rc == ST_OK)
            rc = push_feature(s, f);
        if (rc != ST_OK) {
            st_feature_free(f);
            break;
        }
        L->read++;
        if ((L->read & 0x3FFF) == 0) {
            long long done, total;
            st_reader_progress(r, &done, &total);
            progress(s, "read", done, total);
        }
    }
    if (rc == ST_OK) {
        L->name = unique_layer_name(s, l, st_reader_layer_name(r));
        L->path = st_strdup(st_reader_path(r));
        L->format = st_strdup(st_reader_format_name(r));
        L->crs = st_strdup(st_reader_crs(r) ? st_reader_crs(r) : "");
        rc = L->name && L->path && L->format && L->crs ? ST_OK : ST_ERR_NOMEM;
    }
    if (rc == ST_OK)
        rc = st_fields_copy(&s->fields[l], st_reader_fields(r));
    if (rc == ST_OK)
        demote_numeric_fields(s, l, first);
    st_reader_close(r);
    return rc;
}

/* The robust extent of layer l, for the swapped-axes check. */
static st_status layer_extent(run_state *s, uint32_t l, size_t first, size_t end,
                              st_footprint_extent *ext)
{
    double *xy = st_malloc(2 * (end - first + 1) * sizeof *xy);
    if (!xy)
        return ST_ERR_NOMEM;
    size_t n = 0;
    for (size_t i = first; i < end; i++)
        if (s->features[i]->layer == l && st_footprint_center(&s->features[i]->geom, xy + 2 * n))
            n++;
    st_status rc = st_footprint_extent_compute(xy, n, ext);
    st_free(xy);
    return rc;
}

/* ---- chunks of work ------------------------------------------------------ */

/* The features split into chunks of at most ST_POOL_CHUNK, never across a
** layer boundary (the footprint check depends on the layer's extent). */
typedef struct chunk {
    size_t first, end;
    uint32_t layer;
} chunk;

static chunk *make_chunks(run_state *s, size_t *n)
{
    size_t cap = s->nfeatures / ST_POOL_CHUNK + s->res->nlayers + 1;
    chunk *c = st_malloc(cap * sizeof *c);
    *n = 0;
    if (!c)
        return NULL;
    for (size_t i = 0; i < s->nfeatures;) {
        uint32_t layer = s->features[i]->layer;
        size_t end = i;
        while (end < s->nfeatures && end - i < ST_POOL_CHUNK && s->features[end]->layer == layer)
            end++;
        c[(*n)++] = (chunk){i, end, layer};
        i = end;
    }
    return c;
}

/* Per-chunk findings, then moved into the run's list in chunk order. */
static st_findings *new_chunk_findings(size_t n)
{
    st_findings *f = st_calloc(n ? n : 1, sizeof *f);
    for (size_t i = 0; f && i < n; i++)
        st_findings_init(&f[i]);
    return f;
}

static st_status merge_chunk_findings(run_state *s, st_findings *f, size_t n, st_status rc)
{
    for (size_t i = 0; f && i < n; i++) {
        if (rc == ST_OK)
            rc = st_findings_move(&s->findings, &f[i]);
        st_findings_free(&f[i]);
    }
    st_free(f);
    return rc;
}

/* Diagnostics a worker gathered, added to the run's in chunk order. */
static void merge_chunk_diags(run_state *s, st_diags *d, size_t n)
{
    for (size_t i = 0; d && i < n; i++) {
        for (size_t k = 0; k < d[i].count; k++) {
            const st_diag *g = &d[i].items[k];
            st_loc loc = {g->file, g->line, g->col, g->len, g->feature, g->offset};
            st_diags_add(s->diags, g->severity, g->code, &loc, "%s", g->message);
        }
        st_diags_free(&d[i]);
    }
    st_free(d);
}

/* Progress from the calling thread (worker 0) only. */
static void chunk_progress(run_state *s, unsigned worker, const char *stage, size_t done)
{
    if (worker == 0)
        progress(s, stage, (long long)done, (long long)s->nfeatures);
}

/* ---- footprint stage ---------------------------------------------------- */

typedef struct fp_job {
    run_state *s;
    const chunk *chunks;
    st_footprint_checker **ck;     /* one per worker */
    const st_footprint_extent *ext;/* one per layer */
    st_findings *out;              /* one per chunk */
} fp_job;

static st_status fp_task(void *ctx, unsigned worker, size_t c)
{
    fp_job *j = ctx;
    const chunk *k = &j->chunks[c];
    st_footprint_checker *ck = j->ck[worker];
    st_footprint_checker_set_extent(ck, &j->ext[k->layer]);
    st_status rc = ST_OK;
    for (size_t i = k->first; rc == ST_OK && i < k->end; i++)
        rc = st_footprint_check(ck, &j->s->fcfg, j->s->features[i], &j->out[c]);
    chunk_progress(j->s, worker, "footprints", k->end);
    return rc;
}

static st_status layer_extents(run_state *s, st_footprint_extent *ext)
{
    st_status rc = ST_OK;
    size_t i = 0;
    for (size_t l = 0; rc == ST_OK && l < s->res->nlayers; l++) {
        size_t end = i;
        while (end < s->nfeatures && s->features[end]->layer == l)
            end++;
        rc = layer_extent(s, (uint32_t)l, i, end, &ext[l]);
        i = end;
    }
    return rc;
}

static st_status check_footprints(run_state *s)
{
    size_t nchunks = 0;
    chunk *chunks = make_chunks(s, &nchunks);
    fp_job j = {s, chunks, st_calloc(s->threads, sizeof *j.ck),
                st_calloc(s->res->nlayers + 1, sizeof *j.ext), new_chunk_findings(nchunks)};
    st_status rc = chunks && j.ck && j.ext && j.out ? ST_OK : ST_ERR_NOMEM;
    for (unsigned w = 0; rc == ST_OK && w < s->threads; w++)
        rc = st_footprint_checker_new(&j.ck[w]);
    if (rc == ST_OK)
        rc = layer_extents(s, (st_footprint_extent *)j.ext);
    if (rc == ST_OK)
        rc = st_pool_run(s->threads, nchunks, fp_task, &j);
    rc = merge_chunk_findings(s, j.out, nchunks, rc);
    for (unsigned w = 0; j.ck && w < s->threads; w++)
        st_footprint_checker_free(j.ck[w]);
    st_free(j.ck);
    st_free((void *)j.ext);
    st_free(chunks);
    if (rc != ST_OK)
        st_diags_add(s->diags, ST_SEV_ERROR, rc, NULL, "footprint stage failed: %s",
                     st_status_name(rc));
    return rc;
}

/* ---- neighbour stage ------------------------------------------------------ */

typedef struct nb_job {
    run_state *s;
    const st_neighbours *nb;
    size_t count;                  /* indexed footprints */
    st_geos **gx;                  /* one per worker */
    st_neighbours_pairs **pairs;   /* one per chunk */
    st_diags *diags;               /* one per chunk */
} nb_job;

static st_status nb_task(void *ctx, unsigned worker, size_t c)
{
    nb_job *j = ctx;
    size_t begin = c * ST_POOL_CHUNK;
    size_t end = begin + ST_POOL_CHUNK < j->count ? begin + ST_POOL_CHUNK : j->count;
    st_status rc = st_neighbours_scan(j->nb, j->gx[worker], begin, end, &j->diags[c],
                                      &j->pairs[c]);
    chunk_progress(j->s, worker, "neighbours", end);
    return rc;
}

/* begin (exact duplicates, index) in this thread, scans of chunks of the
** index on the pool, finish (near duplicates, overlaps) in this thread. */
static st_status compare_neighbours(run_state *s)
{
    const char **names = st_calloc(s->res->nlayers, sizeof *names);
    if (!names)
        return ST_ERR_NOMEM;
    for (size_t l = 0; l < s->res->nlayers; l++)
        names[l] = s->res->layers[l].name;
    st_neighbours_input in = {s->features, s->nfeatures, names, (uint32_t)s->res->nlayers};
    progress(s, "neighbours", 0, (long long)s->nfeatures);
    st_neighbours *nb = NULL;
    st_status rc = st_neighbours_begin(&s->ncfg, &in, s->gx, &s->findings, s->diags, &nb);
    size_t count = rc == ST_OK ? st_neighbours_count(nb) : 0;
    size_t nchunks = (count + ST_POOL_CHUNK - 1) / ST_POOL_CHUNK;
    nb_job j = {s, nb, count, st_calloc(s->threads, sizeof *j.gx),
                st_calloc(nchunks + 1, sizeof *j.pairs), st_calloc(nchunks + 1, sizeof *j.diags)};
    if (rc == ST_OK && (!j.gx || !j.pairs || !j.diags))
        rc = ST_ERR_NOMEM;
    for (size_t c = 0; j.diags && c < nchunks; c++)
        st_diags_init(&j.diags[c]);
    if (rc == ST_OK)
        j.gx[0] = s->gx;   /* the calling thread's own context */
    for (unsigned w = 1; rc == ST_OK && w < s->threads; w++)
        if (!(j.gx[w] = st_geos_new()))
            rc = ST_ERR_NOMEM;
    if (rc == ST_OK)
        rc = st_pool_run(s->threads, nchunks, nb_task, &j);
    merge_chunk_diags(s, j.diags, j.diags ? nchunks : 0);
    if (rc == ST_OK)
        rc = st_neighbours_finish(nb, j.pairs, nchunks, &s->findings, s->diags);
    for (size_t c = 0; j.pairs && c < nchunks; c++)
        st_neighbours_pairs_free(j.pairs[c]);
    for (unsigned w = 1; j.gx && w < s->threads; w++)
        st_geos_free(j.gx[w]);
    st_free(j.gx);
    st_free(j.pairs);
    st_neighbours_free(nb);
    st_free(names);
    return rc;
}

/* The unmapped values of the run, most frequent first, copied into the
** result so they outlive the rule context. */
static st_status keep_unmapped(run_state *s, const st_unmapped *u)
{
    st_unmapped_item *items = NULL;
    size_t n = 0;
    st_status rc = st_unmapped_sorted(u, &items, &n);
    if (rc != ST_OK)
        return rc;
    st_run_result *r = s->res;
    r->unmapped = st_calloc(n ? n : 1, sizeof *r->unmapped);
    rc = r->unmapped ? ST_OK : ST_ERR_NOMEM;
    for (size_t i = 0; rc == ST_OK && i < n; i++) {
        st_run_unmapped *m = &r->unmapped[i];
        m->field = st_strdup(items[i].field);
        m->value = st_strdup(items[i].value);
        m->count = items[i].count;
        r->nunmapped = i + 1;
        if (!m->field || !m->value)
            rc = ST_ERR_NOMEM;
    }
    st_free(items);
    return rc;
}

/* ---- rules stage ------------------------------------------------------- */

typedef struct rules_job {
    run_state *s;
    const chunk *chunks;
    st_rules_ctx **ctx;            /* one per worker */
    st_findings *out;              /* one per chunk */
} rules_job;

static st_status rules_task(void *ctx, unsigned worker, size_t c)
{
    rules_job *j = ctx;
    const chunk *k = &j->chunks[c];
    st_rules_ctx *rc_ctx = j->ctx[worker];
    st_rules_ctx_reset_layer(rc_ctx);
    st_status rc = ST_OK;
    for (size_t i = k->first; rc == ST_OK && i < k->end; i++) {
        st_feature *f = j->s->features[i];
        if (f->status == ST_STATUS_OK || f->status == ST_STATUS_REPAIRED)
            rc = st_rules_apply(rc_ctx, f, &j->s->fields[f->layer], &j->out[c]);
    }
    chunk_progress(j->s, worker, "rules", k->end);
    return rc;
}

/* map -> derive -> check on every kept building; each worker counts its
** unmapped values, and the counts are added up (a sum: any order). */
static st_status apply_rules(run_state *s)
{
    if (!s->rules)
        return ST_OK;
    size_t nchunks = 0;
    chunk *chunks = make_chunks(s, &nchunks);
    rules_job j = {s, chunks, st_calloc(s->threads, sizeof *j.ctx), new_chunk_findings(nchunks)};
    st_status rc = chunks && j.ctx && j.out ? ST_OK : ST_ERR_NOMEM;
    for (unsigned w = 0; rc == ST_OK && w < s->threads; w++)
        rc = st_rules_ctx_new(s->rules, &j.ctx[w]);
    if (rc == ST_OK)
        rc = st_pool_run(s->threads, nchunks, rules_task, &j);
    rc = merge_chunk_findings(s, j.out, nchunks, rc);
    for (unsigned w = 1; rc == ST_OK && w < s->threads; w++)
        rc = st_unmapped_merge(st_rules_ctx_unmapped(j.ctx[0]), st_rules_ctx_unmapped(j.ctx[w]));
    if (rc == ST_OK)
        rc = keep_unmapped(s, st_rules_ctx_unmapped(j.ctx[0]));
    if (rc == ST_OK)
        rc = st_unmapped_new(&s->unmapped);
    if (rc == ST_OK)
        rc = st_unmapped_merge(s->unmapped, st_rules_ctx_unmapped(j.ctx[0]));
    for (unsigned w = 0; j.ctx && w < s->threads; w++)
        st_rules_ctx_free(j.ctx[w]);
    st_free(j.ctx);
    st_free(chunks);
    return rc;
}

static int is_kept(const st_feature *f)
{
    return f->status == ST_STATUS_OK || f->status == ST_STATUS_REPAIRED;
}

static st_status place_buildings(run_state *s)
{
    if (!s->districts)
        return ST_OK;
    progress(s, "place", 0, (long long)s->nfeatures);
    st_place_stats stats;
    return st_place_features(s->districts, s->features, s->nfeatures, s->threads,
                             ST_SEV_WARNING, &s->findings, s->diags, &stats);
}

/* Read the defaults tables now: a bad table stops the run before any data
** is read. */
static st_status prepare_defaults(run_state *s)
{
    size_t n = s->districts ? st_districts_count(s->districts) : 0;
    const char **region = st_calloc(n ? n : 1, sizeof *region);
    if (!region)
        return ST_ERR_NOMEM;
    for (size_t i = 0; i < n; i++)
        region[i] = st_districts_get(s->districts, i)->region;
    st_defaults_places pl = {s->districts ? st_districts_keys(s->districts) : NULL, region, n};
    st_status rc = st_defaults_new(s->rules, &pl, s->diags, &s->defaults);
    st_free(region);
    return rc;
}

typedef struct defaults_job {
    run_state *s;
    const chunk *chunks;
    st_rules_ctx **ctx;            /* one per worker */
    size_t skip;                   /* the building already filled */
} defaults_job;

static st_status defaults_task(void *ctx, unsigned worker, size_t c)
{
    defaults_job *j = ctx;
    const chunk *k = &j->chunks[c];
    st_status rc = ST_OK;
    for (size_t i = k->first; rc == ST_OK && i < k->end; i++)
        if (i != j->skip && is_kept(j->s->features[i]))
            rc = st_defaults_apply(j->s->defaults, j->ctx[worker], j->s->features[i],
                                   j->s->opt->fill, j->s->opt->seed);
    chunk_progress(j->s, worker, "defaults", k->end);
    return rc;
}

/* Learn from the observed values, then fill what is still unknown. The
** first building is filled here, which makes the defaults build their
** tables (they do it on first use); after that st_defaults_apply only
** reads them, and each building's values depend on that building alone
** (the draw hashes seed, bid and field), so the rest go to the pool. */
static st_status fill_defaults(run_state *s)
{
    if (!s->rules)
        return ST_OK;
    progress(s, "defaults", 0, (long long)s->nfeatures);
    size_t nchunks = 0;
    chunk *chunks = make_chunks(s, &nchunks);
    defaults_job j = {s, chunks, st_calloc(s->threads, sizeof *j.ctx), SIZE_MAX};
    st_status rc = chunks && j.ctx ? ST_OK : ST_ERR_NOMEM;
    if (rc == ST_OK)
        rc = st_defaults_learn(s->defaults, s->features, s->nfeatures);
    for (unsigned w = 0; rc == ST_OK && w < s->threads; w++)
        rc = st_rules_ctx_new(s->rules, &j.ctx[w]);
    for (size_t i = 0; rc == ST_OK && i < s->nfeatures && j.skip == SIZE_MAX; i++)
        if (is_kept(s->features[i])) {
            rc = st_defaults_apply(s->defaults, j.ctx[0], s->features[i], s->opt->fill,
                                   s->opt->seed);
            j.skip = i;
        }
    if (rc == ST_OK && j.skip != SIZE_MAX)
        rc = st_pool_run(s->threads, nchunks, defaults_task, &j);
    for (unsigned w = 0; j.ctx && w < s->threads; w++)
        st_rules_ctx_free(j.ctx[w]);
    st_free(j.ctx);
    st_free(chunks);
    return rc;
}

static st_status run_audit(run_state *s)
{
    int fail_on = s->opt->fail_on == ST_FAIL_ON_WARNING ? ST_SEV_WARNING
                : s->opt->fail_on == ST_FAIL_ON_ERROR ? ST_SEV_ERROR : -1;
    st_audit_input in = {s->features, s->nfeatures, &s->findings, s->districts, s->rules,
                         s->defaults, s->unmapped, s->reference, fail_on};
    return st_audit_compute(&in, s->diags, &s->res->audit);
}

/* Findings in building order (stable: a stage's own order is kept). */
static int by_bid(const void *a, const void *b)
{
    const st_finding *x = a, *y = b;
    if (x->bid != y->bid)
        return x->bid < y->bid ? -1 : 1;
    return x < y ? -1 : x > y;
}

static void sort_findings(st_findings *f)
{
    /* qsort is not stable: make the array order part of the key by
    ** sorting an index first. Simpler: insertion order is bid-major
    ** within each stage, so a merge sort keeps ties in place. */
    size_t n = f->count;
    if (n < 2)
        return;
    st_finding *tmp = st_malloc(n * sizeof *tmp);
    if (!tmp) {
        qsort(f->items, n, sizeof *f->items, by_bid);   /* still ordered by bid */
        return;
    }
    for (size_t width = 1; width < n; width *= 2) {
        for (size_t lo = 0; lo < n; lo += 2 * width) {
            size_t mid = lo + width < n ? lo + width : n;
            size_t hi = lo + 2 * width < n ? lo + 2 * width : n;
            size_t a = lo, b = mid, k = lo;
            while (a < mid && b < hi)
                tmp[k++] = f->items[b].bid < f->items[a].bid ? f->items[b++] : f->items[a++];
            while (a < mid)
                tmp[k++] = f->items[a++];
            while (b < hi)
                tmp[k++] = f->items[b++];
        }
        memcpy(f->items, tmp, n * sizeof *tmp);
    }
    st_free(tmp);
}

static void tally(run_state *s)
{
    for (size_t i = 0; i < s->nfeatures; i++) {
        const st_feature *f = s->features[i];
        st_run_layer *L = &s->res->layers[f->layer];
        switch (f->status) {
        case ST_STATUS_OK: L->kept++; break;
        case ST_STATUS_REPAIRED: L->kept++; L->repaired++; break;
        case ST_STATUS_DUPLICATE: L->duplicate++; break;
        case ST_STATUS_REJECTED: L->rejected++; break;
        }
    }
}

static int by_count(const void *a, const void *b)
{
    const st_run_code_count *x = a, *y = b;
    if (x->count != y->count)
        return x->count > y->count ? -1 : 1;
    return strcmp(x->code, y->code);
}

static st_status count_codes(run_state *s)
{
    st_run_result *r = s->res;
    for (size_t k = 0; k < s->findings.count; k++) {
        const st_finding *g = &s->findings.items[k];
        r->findings[g->severity]++;
        size_t c = 0;
        while (c < r->ncodes && strcmp(r->codes[c].code, g->code) != 0)
            c++;
        if (c == r->ncodes) {
            st_run_code_count *a = st_realloc(r->codes, (c + 1) * sizeof *a);
            if (!a)
                return ST_ERR_NOMEM;
            r->codes = a;
            r->codes[c] = (st_run_code_count){g->code, g->severity, 0};
            r->ncodes++;
        }
        r->codes[c].count++;
        if (g->severity > r->codes[c].severity)
            r->codes[c].severity = g->severity;
    }
    if (r->ncodes > 1)   /* qsort of a NULL array is undefined, even of 0 items */
        qsort(r->codes, r->ncodes, sizeof *r->codes, by_count);
    return ST_OK;
}

/* The gate as the audit judged it (rule gate lines, then --fail-on): the
** first failing line says why. */
static st_status decide_gate(run_state *s)
{
    st_run_result *r = s->res;
    const st_audit *a = r->audit;
    r->gate_failed = a->gate_failed;
    for (size_t i = 0; i < a->ngates && !r->gate_reason; i++) {
        const st_audit_gate *g = &a->gates[i];
        if (!g->passed && g->fails && !(r->gate_reason = st_strdup_printf("%s (%s)", g->detail,
                                                                          g->rule)))
            return ST_ERR_NOMEM;
    }
    return ST_OK;
}

/* kept (or set-aside) features in bid order */
static st_feature **select_features(run_state *s, int kept, size_t *n)
{
    st_feature **out = st_malloc((s->nfeatures + 1) * sizeof *out);
    *n = 0;
    if (!out)
        return NULL;
    for (size_t i = 0; i < s->nfeatures; i++) {
        st_feature_status st = s->features[i]->status;
        int is_kept = st == ST_STATUS_OK || st == ST_STATUS_REPAIRED;
        if (is_kept == kept)
            out[(*n)++] = s->features[i];
    }
    return out;
}

static st_status write_run_info(run_state *s, st_inventory *inv)
{
    char when[32];
    st_now_iso8601(when);
    size_t nl = s->res->nlayers;
    size_t n = 3 + nl + 3;
    const char **kv = st_calloc(2 * n, sizeof *kv);
    char **owned = st_calloc(nl + 1, sizeof *owned);
    st_status rc = kv && owned ? ST_OK : ST_ERR_NOMEM;
    if (rc == ST_OK) {
        kv[0] = "tool";
        kv[1] = "stocktake " ST_VERSION;
        kv[2] = "command";
        kv[3] = s->opt->command_line ? s->opt->command_line : "";
        kv[4] = "finished";
        kv[5] = when;
        for (size_t l = 0; l < nl && rc == ST_OK; l++) {
            const st_run_layer *L = &s->res->layers[l];
            owned[l] = st_strdup_printf(
                "%s (%s, %s): read %llu = buildings %llu + set aside %llu",
                L->path, L->format, L->crs, (unsigned long long)L->read,
                (unsigned long long)L->kept,
                (unsigned long long)(L->duplicate + L->rejected));
            kv[2 * (3 + l)] = L->name;
            kv[2 * (3 + l) + 1] = owned[l];
            if (!owned[l])
                rc = ST_ERR_NOMEM;
        }
    }
    char seed[32];
    snprintf(seed, sizeof seed, "%llu", (unsigned long long)s->opt->seed);
    size_t k = 3 + nl;
    if (rc == ST_OK && s->districts) {
        const st_districts *d = s->districts;
        owned[nl] = st_strdup_printf(
            "%s (%s): key %s, region %s, %zu districts, %zu polygon(s) repaired",
            st_districts_path(d), st_districts_crs(d), st_districts_key_field(d),
            st_districts_region_field(d) ? st_districts_region_field(d) : "none",
            st_districts_count(d), st_districts_repaired(d));
        kv[2 * k] = "districts";
        kv[2 * k++ + 1] = owned[nl];
        rc = owned[nl] ? ST_OK : ST_ERR_NOMEM;
    }
    if (s->rules) {
        kv[2 * k] = "fill";
        kv[2 * k++ + 1] = st_fill_mode_name(s->opt->fill);
        kv[2 * k] = "seed";
        kv[2 * k++ + 1] = seed;
    }
    n = k;
    if (rc == ST_OK)
        rc = st_inventory_write_run_info(inv, kv, n);
    for (size_t l = 0; owned && l <= nl; l++)
        st_free(owned[l]);
    st_free(owned);
    st_free(kv);
    return rc;
}

/* Storeys field of the schema, or -1 (no rules). */
static int32_t storeys_field(const run_state *s)
{
    return s->rules ? st_rules_field_find(s->rules, "storeys") : -1;
}

static void report_files_free(report_files *rf)
{
    for (size_t i = 0; i < rf->count; i++)
        st_free(rf->paths[i]);
    st_free(rf->paths);
    st_free(rf->items);
    memset(rf, 0, sizeof *rf);
}

/* Add 'path' (taken: freed here on failure or when already listed). */
static st_status add_file(report_files *rf, const char *role, char *path)
{
    if (!path)
        return ST_ERR_NOMEM;
    for (size_t i = 0; i < rf->count; i++)
        if (!strcmp(rf->paths[i], path)) {
            st_free(path);
            return ST_OK;
        }
    if (rf->count == rf->cap) {
        size_t cap = rf->cap ? 2 * rf->cap : 8;
        st_report_file *it = st_realloc(rf->items, cap * sizeof *it);
        if (it)
            rf->items = it;
        char **p = it ? st_realloc(rf->paths, cap * sizeof *p) : NULL;
        if (!p) {
            st_free(path);
            return ST_ERR_NOMEM;
        }
        rf->paths = p;
        rf->cap = cap;
    }
    rf->paths[rf->count] = path;
    memset(&rf->items[rf->count], 0, sizeof rf->items[rf->count]);
    rf->items[rf->count].role = role;
    rf->items[rf->count].path = path;
    rf->count++;
    return ST_OK;
}

/* A layer's file and, for a shapefile, its sibling files. */
static st_status add_layer_files(report_files *rf, const char *role, const char *path)
{
    char **sib = NULL;
    size_t n = 0;
    st_status rc = st_report_file_siblings(path, &sib, &n);
    for (size_t i = 0; i < n; i++) {
        if (rc == ST_OK)
            rc = add_file(rf, role, sib[i]);
        else
            st_free(sib[i]);
    }
    st_free(sib);
    return rc;
}

static st_status collect_files(run_state *s, report_files *rf)
{
    st_status rc = ST_OK;
    for (size_t l = 0; rc == ST_OK && l < s->res->nlayers; l++)
        rc = add_layer_files(rf, "input", s->res->layers[l].path);
    for (size_t i = 0; rc == ST_OK && i < s->opt->nrules; i++)
        rc = add_file(rf, "rules", st_strdup(s->opt->rules[i]));
    for (size_t i = 0; rc == ST_OK && s->rules && i < st_rules_table_count(s->rules); i++)
        rc = add_file(rf, "defaults table", st_strdup(st_rules_table(s->rules, i)->path));
    if (rc == ST_OK && s->opt->districts)
        rc = add_layer_files(rf, "districts", s->opt->districts);
    if (rc == ST_OK && s->opt->reference)
        rc = add_file(rf, "reference", st_strdup(s->opt->reference));
    if (rc == ST_OK)
        rc = st_report_hash_files(rf->items, rf->count, s->diags);
    return rc;
}

/* res->outputs: the inventory, then the report files when asked for. */
static st_status set_outputs(run_state *s)
{
    st_run_result *r = s->res;
    r->outputs = st_calloc(3, sizeof *r->outputs);
    if (!r->outputs)
        return ST_ERR_NOMEM;
    r->outputs[r->noutputs++] = st_strdup(s->opt->output);
    if (s->opt->report_dir) {
        const char *d = s->opt->report_dir;
        size_t dl = strlen(d);
        while (dl > 1 && d[dl - 1] == '/')
            dl--;
        r->outputs[r->noutputs++] = st_strdup_printf("%.*s/report.json", (int)dl, d);
        r->outputs[r->noutputs++] = st_strdup_printf("%.*s/report.html", (int)dl, d);
    }
    for (size_t i = 0; i < r->noutputs; i++)
        if (!r->outputs[i])
            return ST_ERR_NOMEM;
    return ST_OK;
}

static void report_input(run_state *s, const report_files *rf, const char *finished,
                         st_report_input *in)
{
    memset(in, 0, sizeof *in);
    in->run = s->res;
    in->audit = s->res->audit;
    in->dist = &s->dist;
    in->files = rf ? rf->items : NULL;
    in->nfiles = rf ? rf->count : 0;
    in->command_line = s->opt->command_line;
    in->started = s->started;
    in->finished = finished;
    in->outputs = (const char *const *)s->res->outputs;
    in->noutputs = s->res->noutputs;
}

/* Render report.json and report.html under temporary names. */
static st_status prepare_report(run_state *s, st_report_pending **rep)
{
    report_files rf;
    memset(&rf, 0, sizeof rf);
    progress(s, "report", 0, 1);
    st_status rc = collect_files(s, &rf);
    if (rc == ST_OK) {
        char finished[32];
        st_now_iso8601(finished);
        st_report_input in;
        report_input(s, &rf, finished, &in);
        rc = st_report_prepare(&in, s->opt->report_dir, s->diags, rep);
    }
    report_files_free(&rf);
    return rc;
}

static st_status make_summary(run_state *s)
{
    char finished[32];
    st_now_iso8601(finished);
    st_report_input in;
    report_input(s, NULL, finished, &in);
    st_buf b;
    st_buf_init(&b, ST_REPORT_MAX_BYTES);
    st_status rc = st_report_text(&in, &b);
    if (rc == ST_OK)
        s->res->summary = st_buf_take(&b);
    st_buf_free(&b);
    return rc == ST_OK && !s->res->summary ? ST_ERR_NOMEM : rc;
}

/* The unmapped values as rows of (field, value, count) for the inventory. */
static st_status write_unmapped(run_state *s, st_inventory *inv)
{
    const st_run_result *r = s->res;
    const char **rows = st_calloc(3 * r->nunmapped + 1, sizeof *rows);
    char **counts = st_calloc(r->nunmapped + 1, sizeof *counts);
    st_status rc = rows && counts ? ST_OK : ST_ERR_NOMEM;
    for (size_t i = 0; rc == ST_OK && i < r->nunmapped; i++) {
        counts[i] = st_strdup_printf("%llu", (unsigned long long)r->unmapped[i].count);
        rows[3 * i] = r->unmapped[i].field;
        rows[3 * i + 1] = r->unmapped[i].value;
        rows[3 * i + 2] = counts[i];
        if (!counts[i])
            rc = ST_ERR_NOMEM;
    }
    if (rc == ST_OK)
        rc = st_inventory_write_unmapped(inv, rows, r->nunmapped);
    for (size_t i = 0; counts && i < r->nunmapped; i++)
        st_free(counts[i]);
    st_free(counts);
    st_free(rows);
    return rc;
}

static st_status write_inventory(run_state *s)
{
    size_t nl = s->res->nlayers;
    st_inventory_layer *layers = st_calloc(nl, sizeof *layers);
    if (!layers)
        return ST_ERR_NOMEM;
    for (size_t l = 0; l < nl; l++)
        layers[l] = (st_inventory_layer){s->res->layers[l].name, &s->fields[l]};
    st_inventory *inv = NULL;
    const char *const *names = s->districts ? st_districts_keys(s->districts) : NULL;
    size_t nk = 0, ns = 0;
    st_feature **kept = NULL, **aside = NULL;
    progress(s, "write", 0, (long long)s->nfeatures);
    uint32_t nschema = s->rules ? st_rules_field_count(s->rules) : 0;
    const char **schema = st_calloc(nschema + 1, sizeof *schema);
    if (!schema) {
        st_free(layers);
        return ST_ERR_NOMEM;
    }
    for (uint32_t k = 0; k < nschema; k++)
        schema[k] = st_rules_field(s->rules, k)->name;
    st_status rc = st_inventory_open(s->opt->output, layers, (uint32_t)nl, schema, nschema,
                                     s->diags, &inv);
    st_free(schema);
    if (rc == ST_OK) {
        kept = select_features(s, 1, &nk);
        aside = select_features(s, 0, &ns);
        rc = kept && aside ? ST_OK : ST_ERR_NOMEM;
    }
    for (size_t i = 0; rc == ST_OK && i < nk; i++)
        st_report_dist_add(&s->dist, kept[i], storeys_field(s));
    if (rc == ST_OK)
        rc = st_inventory_write_buildings(inv, kept, nk, names);
    if (rc == ST_OK)
        rc = st_inventory_write_set_aside(inv, aside, ns, names);
    if (rc == ST_OK)
        rc = st_inventory_write_findings(inv, &s->findings);
    if (rc == ST_OK && s->districts)
        rc = st_inventory_write_districts(inv, s->res->audit);
    if (rc == ST_OK)
        rc = write_run_info(s, inv);
    if (rc == ST_OK)
        rc = write_unmapped(s, inv);
    /* The report is rendered and written to temporary names before the
    ** inventory is renamed into place, so an error in either leaves
    ** nothing behind; the two renames after that do not fail in practice
    ** (same folders, files already written). */
    st_report_pending *rep = NULL;
    if (rc == ST_OK && s->opt->report_dir)
        rc = prepare_report(s, &rep);
    if (rc == ST_OK)
        rc = st_inventory_commit(inv);
    if (rc == ST_OK && rep)
        rc = st_report_commit(rep, s->diags);
    st_report_pending_free(rep);
    st_inventory_close(inv);
    st_free(kept);
    st_free(aside);
    st_free(layers);
    return rc;
}

/* Rules first: a bad rule file stops the run before any data is read. */
static st_status load_rules(run_state *s)
{
    s->fcfg = st_footprint_config_default();
    st_neighbours_config_init(&s->ncfg);
    if (!s->opt->nrules)
        return ST_OK;
    st_status rc = st_rules_load(s->opt->rules, s->opt->nrules, s->diags, &s->rules);
    if (rc == ST_OK)
        rc = st_settings_apply(s->rules, &s->fcfg, &s->ncfg, s->diags);
    return rc;
}

/* ---- timings (run --timings, bench) -------------------------------------- */

typedef struct clock_pair {
    double wall, cpu;
} clock_pair;

static clock_pair clock_now(void)
{
    struct timespec w = {0, 0}, c = {0, 0};
    clock_gettime(CLOCK_MONOTONIC, &w);
    clock_gettime(CLOCK_PROCESS_CPUTIME_ID, &c);
    return (clock_pair){(double)w.tv_sec + (double)w.tv_nsec * 1e-9,
                        (double)c.tv_sec + (double)c.tv_nsec * 1e-9};
}

static long peak_rss_kb(void)
{
    struct rusage u;
    return getrusage(RUSAGE_SELF, &u) == 0 ? u.ru_maxrss : 0;   /* kB on Linux */
}

/* Record the stage that began at 'since'; returns the time now, where the
** next stage begins. */
static clock_pair stage_done(run_state *s, const char *stage, clock_pair since, uint64_t items)
{
    clock_pair t = clock_now();
    st_run_result *r = s->res;
    if (r->ntimings < ST_RUN_MAX_TIMINGS)
        r->timings[r->ntimings++] = (st_run_timing){stage, t.wall - since.wall, t.cpu - since.cpu,
                                                    items, peak_rss_kb()};
    return t;
}

/* Districts, reference counts and defaults tables: all read before the
** footprints, so a bad one stops the run early. */
static st_status load_places(run_state *s)
{
    st_status rc = ST_OK;
    if (s->opt->districts) {
        st_districts_options d = {s->opt->districts, s->opt->district_key,
                                  s->opt->region_key, NULL};
        progress(s, "districts", 0, 0);
        rc = st_districts_load(&d, s->diags, &s->districts);
    }
    if (rc == ST_OK && s->opt->reference)
        rc = st_reference_load(s->opt->reference, s->diags, &s->reference);
    if (rc == ST_OK && s->rules)
        rc = prepare_defaults(s);
    return rc;
}

/* Run one stage unless an earlier one failed, and time it (wall, CPU of
** all threads, peak memory so far). */
static st_status timed(run_state *s, st_status rc, const char *stage,
                       st_status (*fn)(run_state *))
{
    if (rc != ST_OK)
        return rc;
    clock_pair t0 = clock_now();
    rc = fn(s);
    stage_done(s, stage, t0, s->nfeatures);
    return rc;
}

static st_status read_layers(run_state *s)
{
    st_status rc = ST_OK;
    for (size_t l = 0; rc == ST_OK && l < s->opt->ninputs; l++)
        rc = read_layer(s, l);
    return rc;
}

static st_status tally_findings(run_state *s)
{
    sort_findings(&s->findings);
    tally(s);
    return count_codes(s);
}

static st_status outputs_and_summary(run_state *s)
{
    st_status rc = set_outputs(s);
    /* the summary first: once the outputs are in place nothing may fail */
    return rc == ST_OK ? make_summary(s) : rc;
}

static st_status run_stages(run_state *s)
{
    clock_pair start = clock_now();
    st_status rc = timed(s, ST_OK, "rules", load_rules);
    rc = timed(s, rc, "districts", load_places);
    rc = timed(s, rc, "read", read_layers);
    rc = timed(s, rc, "footprints", check_footprints);
    rc = timed(s, rc, "neighbours", compare_neighbours);
    rc = timed(s, rc, "place", place_buildings);
    rc = timed(s, rc, "map-derive-check", apply_rules);
    rc = timed(s, rc, "defaults", fill_defaults);
    rc = timed(s, rc, "findings", tally_findings);
    rc = timed(s, rc, "audit", run_audit);
    rc = timed(s, rc, "gate", decide_gate);
    rc = timed(s, rc, "summary", outputs_and_summary);
    rc = timed(s, rc, "write", write_inventory);
    if (rc == ST_OK)
        stage_done(s, "total", start, s->nfeatures);
    return rc;
}

st_status st_run_execute(const st_run_options *opt, st_diags *diags, st_run_result **out)
{
    *out = NULL;
    if (!opt->ninputs || !opt->output)
        return st_diags_add(diags, ST_SEV_ERROR, ST_ERR_USAGE, NULL,
                            "a run needs at least one input and an output");
    run_state s;
    memset(&s, 0, sizeof s);
    s.opt = opt;
    s.diags = diags;
    s.threads = st_pool_threads(opt->threads);
    st_now_iso8601(s.started);
    st_findings_init(&s.findings);
    s.res = st_calloc(1, sizeof *s.res);
    s.fields = st_calloc(opt->ninputs, sizeof *s.fields);
    s.gx = st_geos_new();
    st_status rc = ST_ERR_NOMEM;
    if (s.res && s.fields && s.gx) {
        s.res->nlayers = opt->ninputs;
        s.res->layers = st_calloc(opt->ninputs, sizeof *s.res->layers);
        if (s.res->layers)
            rc = st_run_guard_start(opt, diags, &s.budget);
        if (rc == ST_OK)
            rc = run_stages(&s);
    }
    for (size_t i = 0; i < s.nfeatures; i++)
        st_feature_free(s.features[i]);
    st_free(s.features);
    for (size_t l = 0; s.fields && l < opt->ninputs; l++)
        st_fields_free(&s.fields[l]);
    st_free(s.fields);
    st_findings_free(&s.findings);
    st_geos_free(s.gx);
    st_defaults_free(s.defaults);
    st_unmapped_free(s.unmapped);
    st_reference_free(s.reference);
    st_rules_free(s.rules);
    if (s.res)
        s.res->districts = s.districts;   /* the audit's polygons live there */
    else
        st_districts_free(s.districts);
    if (rc != ST_OK) {
        if (rc == ST_ERR_NOMEM)
            st_diags_add(diags, ST_SEV_ERROR, rc, NULL, "out of memory");
        st_run_result_free(s.res);
        return rc;
    }
    *out = s.res;
    return ST_OK;
}

void st_run_result_free(st_run_result *r)
{
    if (!r)
        return;
    for (size_t l = 0; r->layers && l < r->nlayers; l++) {
        st_free(r->layers[l].name);
        st_free(r->layers[l].path);
        st_free(r->layers[l].format);
        st_free(r->layers[l].crs);
    }
    st_free(r->layers);
    st_free(r->codes);
    st_free(r->gate_reason);
    st_audit_free(r->audit);
    st_districts_free(r->districts);
    for (size_t i = 0; r->unmapped && i < r->nunmapped; i++) {
        st_free(r->unmapped[i].field);
        st_free(r->unmapped[i].value);
    }
    st_free(r->unmapped);
    for (size_t i = 0; i < r->noutputs; i++)
        st_free(r->outputs[i]);
    st_free(r->outputs);
    st_free(r->summary);
    st_free(r);
}
