/*
** pipeline/run_write.c -- the outputs of a run: the terminal summary, the
** inventory (buildings, set_aside, findings, districts, run_info,
** unmapped) and the report, all under temporary names until every one is
** ready, then renamed into place.
*/
#include <pthread.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "stocktake/inventory.h"
#include "pipelineInt.h"

/* The files a run read, hashed for the report (role and path per entry). */
typedef struct report_files {
    st_report_file *items;
    size_t count, cap;
    char **paths;                /* owned copies the items point into */
} report_files;
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

/* The kept buildings into the report's distributions (s->dist). */
typedef struct dist_job {
    run_state *s;
    st_feature **kept;
    size_t nk;
} dist_job;

static void *dist_main(void *arg)
{
    dist_job *j = arg;
    int32_t field = storeys_field(j->s);
    for (size_t i = 0; i < j->nk; i++)
        st_report_dist_add(&j->s->dist, j->kept[i], field);
    return NULL;
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
    st_run_progress(s, "report", 0, 1);
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

st_status st_stage_write(run_state *s)
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
    st_run_progress(s, "write", 0, (long long)s->nfeatures);
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
    if (rc == ST_OK)
        st_inventory_set_threads(inv, s->threads);
    if (rc == ST_OK) {
        kept = select_features(s, 1, &nk);
        aside = select_features(s, 0, &ns);
        rc = kept && aside ? ST_OK : ST_ERR_NOMEM;
    }
    /* The report's distributions are tallied beside the buildings' write
    ** (both only read the features). */
    dist_job dj = {s, kept, nk};
    pthread_t dist_thread;
    int dist_apart = rc == ST_OK && s->threads > 1 &&
                     pthread_create(&dist_thread, NULL, dist_main, &dj) == 0;
    if (rc == ST_OK && !dist_apart)
        dist_main(&dj);
    if (rc == ST_OK)
        rc = st_inventory_write_buildings(inv, kept, nk, names);
    if (dist_apart)
        pthread_join(dist_thread, NULL);
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
        rc = st_run_check_stop(s);   /* the last moment to leave nothing */
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


st_status st_stage_summary(run_state *s)
{
    st_status rc = set_outputs(s);
    /* the summary first: once the outputs are in place nothing may fail */
    return rc == ST_OK ? make_summary(s) : rc;
}
