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
**         feature is made compact after reading (geometry and attributes
**         each packed into one block; schema values borrow the rule set's
**         codes: docs/performance.md, memory per footprint).
** Threads: the per-feature stages (footprint checks, neighbour scans,
**         rules, defaults) run on a pool of opt->threads workers (pool.c) over fixed
**         chunks of ST_POOL_CHUNK features; each chunk's findings, pairs and
**         diagnostics are kept apart and merged in chunk order, so the
**         outputs are the same for any number of threads. The footprint
**         checks begin while the read stage reads: each chunk goes to the
**         other workers as soon as it is read (run_geometry.c). Reading, exact
**         duplicates, the index, the audit and writing stay in the calling
**         thread; placement has threads of its own (place.h).
** Timings: each stage's wall and CPU seconds and the peak memory so far go
**         into st_run_result.timings (run --timings, bench/stages.sh).
** Files:   this one orders the stages and owns the run's state; each stage
**         lives in its own file (run_read.c, run_geometry.c, run_attrs.c,
**         run_tally.c, run_write.c), declared in pipelineInt.h.
*/
#include <math.h>
#include <stdlib.h>
#include <string.h>
#include <sys/resource.h>
#include <time.h>

#include "pipelineInt.h"

/* Rules first: a bad rule file stops the run before any data is read. */
st_status st_run_load_rules(run_state *s)
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
st_status st_run_load_places(run_state *s)
{
    st_status rc = ST_OK;
    if (s->opt->districts) {
        st_districts_options d = {s->opt->districts, s->opt->district_key,
                                  s->opt->region_key, NULL};
        st_run_progress(s, "districts", 0, 0);
        rc = st_districts_load(&d, s->diags, &s->districts);
    }
    if (rc == ST_OK && s->opt->reference)
        rc = st_reference_load(s->opt->reference, s->diags, &s->reference);
    if (rc == ST_OK && s->rules)
        rc = st_run_prepare_defaults(s);
    return rc;
}

/* Run one stage unless an earlier one failed, and time it (wall, CPU of
** all threads, peak memory so far). */
static st_status timed(run_state *s, st_status rc, const char *stage,
                       st_status (*fn)(run_state *))
{
    if (rc != ST_OK || (rc = st_run_check_stop(s)) != ST_OK)
        return rc;
    clock_pair t0 = clock_now();
    rc = fn(s);
    stage_done(s, stage, t0, s->nfeatures);
    return rc;
}

static st_status run_stages(run_state *s)
{
    clock_pair start = clock_now();
    st_status rc = timed(s, ST_OK, "rules", st_run_load_rules);
    rc = timed(s, rc, "districts", st_run_load_places);
    rc = timed(s, rc, "read", st_stage_read);
    rc = timed(s, rc, "footprints", st_stage_footprints);
    rc = timed(s, rc, "neighbours", st_stage_neighbours);
    rc = timed(s, rc, "place", st_stage_place);
    rc = timed(s, rc, "map-derive-check", st_stage_rules);
    rc = timed(s, rc, "defaults", st_stage_defaults);
    rc = timed(s, rc, "findings", st_stage_findings);
    rc = timed(s, rc, "audit", st_stage_audit);
    rc = timed(s, rc, "gate", st_stage_gate);
    rc = timed(s, rc, "summary", st_stage_summary);
    rc = timed(s, rc, "write", st_stage_write);
    if (rc == ST_OK)
        stage_done(s, "total", start, s->nfeatures);
    return rc;
}

/* Back to the state before the read, for a part that reads again with a
** wider halo. */
static void forget_features(run_state *s, const st_memory_budget *before)
{
    for (size_t i = 0; i < s->nfeatures; i++)
        st_feature_free(s->features[i]);
    s->nfeatures = 0;
    s->nread = 0;
    st_findings_free(&s->findings);
    st_findings_init(&s->findings);
    for (size_t l = 0; l < s->res->nlayers; l++) {
        st_run_layer *L = &s->res->layers[l];
        st_free(L->name);
        st_free(L->path);
        st_free(L->format);
        st_free(L->crs);
        memset(L, 0, sizeof *L);
        st_fields_free(&s->fields[l]);
    }
    s->budget = *before;
}

/* Read and run the geometry stages until the halo holds every decision
** about the window's features, then keep only those (run_tile.c). */
static st_status read_part(run_state *s)
{
    st_memory_budget before = s->budget;
    st_status rc = ST_OK;
    for (int attempt = 0;; attempt++) {
        st_window_grow(s->window, s->halo_m, s->read_box);
        rc = timed(s, rc, "read", st_stage_read);
        rc = timed(s, rc, "footprints", st_stage_footprints);
        rc = timed(s, rc, "neighbours", st_stage_neighbours);
        double need = 0;
        if (rc == ST_OK)
            rc = st_run_tile_cut(s, &need);
        if (rc != ST_OK || need <= 0)
            return rc;
        double halo = fmax(2 * s->halo_m, 1.25 * need + 50);
        if (attempt == 8 || !isfinite(halo))
            return st_diags_add(s->diags, ST_SEV_ERROR, ST_ERR_LIMIT, NULL,
                                "%s: a chain of duplicates or overlaps reaches %.0f m beyond "
                                "the window; split the job into larger windows",
                                s->window->label, need);
        st_diags_add(s->diags, ST_SEV_NOTE, ST_OK, NULL,
                     "%s: a building or a chain of duplicates reaches %.0f m beyond the "
                     "window, more than the %.0f m halo; reading again with %.0f m",
                     s->window->label, need, s->halo_m, halo);
        s->halo_m = halo;
        forget_features(s, &before);
    }
}

static st_status part_stages(run_state *s)
{
    clock_pair start = clock_now();
    st_status rc = timed(s, ST_OK, "rules", st_run_load_rules);
    rc = timed(s, rc, "districts", st_run_load_places);
    if (rc == ST_OK)
        rc = read_part(s);
    rc = timed(s, rc, "place", st_stage_place);
    rc = timed(s, rc, "map-derive-check", st_stage_rules);
    rc = timed(s, rc, "findings", st_stage_findings);
    rc = timed(s, rc, "write", st_stage_write_part);
    if (rc == ST_OK)
        stage_done(s, "total", start, s->nfeatures);
    return rc;
}

static st_status merge_stages(run_state *s)
{
    clock_pair start = clock_now();
    st_status rc = timed(s, ST_OK, "rules", st_run_load_rules);
    rc = timed(s, rc, "districts", st_run_load_places);
    rc = timed(s, rc, "read", st_stage_read_parts);
    rc = timed(s, rc, "defaults", st_stage_defaults);
    rc = timed(s, rc, "findings", st_stage_findings);
    rc = timed(s, rc, "audit", st_stage_audit);
    rc = timed(s, rc, "gate", st_stage_gate);
    rc = timed(s, rc, "summary", st_stage_summary);
    rc = timed(s, rc, "write", st_stage_write);
    if (rc == ST_OK)
        stage_done(s, "total", start, s->nfeatures);
    return rc;
}

st_status st_run_merge(const st_run_options *opt, st_diags *diags, st_run_result **out)
{
    *out = NULL;
    if (!opt->ninputs || !opt->output)
        return st_diags_add(diags, ST_SEV_ERROR, ST_ERR_USAGE, NULL,
                            "a merge needs at least one part and an output");
    if (opt->tile || opt->bbox)
        return st_diags_add(diags, ST_SEV_ERROR, ST_ERR_USAGE, NULL,
                            "a merge has no window: it combines the parts of every window");
    run_state s;
    st_status rc = st_run_state_init(&s, opt, diags);
    if (rc == ST_OK)
        rc = st_run_guard_start(opt, diags, &s.budget);
    if (rc == ST_OK)
        rc = merge_stages(&s);
    return st_run_state_finish(&s, rc, out);
}

/* The window of a part from --tile or --bbox; ST_OK without either. */
static st_status parse_window(run_state *s, st_window *w)
{
    const st_run_options *o = s->opt;
    if (!o->tile && !o->bbox)
        return ST_OK;
    if (o->tile && o->bbox)
        return st_diags_add(s->diags, ST_SEV_ERROR, ST_ERR_USAGE, NULL,
                            "--tile and --bbox together: a part has one window");
    char err[256];
    st_status rc = o->tile ? st_window_parse_tile(o->tile, w, err, sizeof err)
                           : st_window_parse_bbox(o->bbox, w, err, sizeof err);
    if (rc != ST_OK)
        return st_diags_add(s->diags, ST_SEV_ERROR, rc, NULL, "%s", err);
    if (o->report_dir)
        return st_diags_add(s->diags, ST_SEV_ERROR, ST_ERR_USAGE, NULL,
                            "a part has no report of its own: give --report to "
                            "'stocktake merge', which finishes the job");
    if (!(o->halo_m >= 0) || o->halo_m > 1e6)
        return st_diags_add(s->diags, ST_SEV_ERROR, ST_ERR_USAGE, NULL,
                            "--halo %g: give metres between 0 and 1000000", o->halo_m);
    s->window = w;
    s->halo_m = o->halo_m > 0 ? o->halo_m : ST_RUN_DEFAULT_HALO_M;
    return ST_OK;
}

st_status st_run_state_init(run_state *s, const st_run_options *opt, st_diags *diags)
{
    memset(s, 0, sizeof *s);
    s->opt = opt;
    s->diags = diags;
    s->threads = st_pool_threads(opt->threads);
    st_now_iso8601(s->started);
    st_findings_init(&s->findings);
    s->res = st_calloc(1, sizeof *s->res);
    s->fields = st_calloc(opt->ninputs, sizeof *s->fields);
    s->nfields = opt->ninputs;
    s->extents = st_calloc(opt->ninputs, sizeof *s->extents);
    s->gx = st_geos_new();
    if (!s->res || !s->fields || !s->extents || !s->gx)
        return ST_ERR_NOMEM;
    s->res->nlayers = opt->ninputs;
    s->res->layers = st_calloc(opt->ninputs, sizeof *s->res->layers);
    return s->res->layers ? ST_OK : ST_ERR_NOMEM;
}

st_status st_run_state_finish(run_state *s, st_status rc, st_run_result **out)
{
    st_run_footprints_cancel(s);   /* workers stop before features go */
    for (size_t i = 0; i < s->nfeatures; i++)
        st_feature_free(s->features[i]);
    st_free(s->features);
    for (size_t l = 0; s->fields && l < s->nfields; l++)
        st_fields_free(&s->fields[l]);
    st_free(s->fields);
    st_free(s->extents);
    st_free(s->shared);
    st_free(s->links);
    st_facts_free(s->facts);
    st_free(s->facts);
    st_findings_free(&s->findings);
    st_geos_free(s->gx);
    st_defaults_free(s->defaults);
    st_unmapped_free(s->unmapped);
    st_reference_free(s->reference);
    st_rules_free(s->rules);
    if (s->res)
        s->res->districts = s->districts;   /* the audit's polygons live there */
    else
        st_districts_free(s->districts);
    if (rc != ST_OK) {
        if (rc == ST_ERR_NOMEM)
            st_diags_add(s->diags, ST_SEV_ERROR, rc, NULL, "out of memory");
        st_run_result_free(s->res);
        st_strtab_free(s->strings);
        return rc;
    }
    *out = s->res;
    s->res->strings = s->strings;   /* merge: finding codes point into it */
    return ST_OK;
}

st_status st_run_execute(const st_run_options *opt, st_diags *diags, st_run_result **out)
{
    *out = NULL;
    if (!opt->ninputs || !opt->output)
        return st_diags_add(diags, ST_SEV_ERROR, ST_ERR_USAGE, NULL,
                            "a run needs at least one input and an output");
    run_state s;
    st_window window;
    st_status rc = st_run_state_init(&s, opt, diags);
    if (rc == ST_OK)
        rc = parse_window(&s, &window);
    if (rc == ST_OK)
        rc = st_run_facts_load(&s);
    if (rc == ST_OK)
        rc = st_run_guard_start(opt, diags, &s.budget);
    if (rc == ST_OK)
        rc = s.window ? part_stages(&s) : run_stages(&s);
    return st_run_state_finish(&s, rc, out);
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
    st_strtab_free(r->strings);
    st_free(r);
}

