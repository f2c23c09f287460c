/*
** pipeline/run_tile.c -- a part of a job split by windows (run --tile,
** --bbox; docs/scale.md): after the geometry stages, decide which
** features the window owns, check that the halo held every decision those
** features depend on, keep only them, and (after place and rules) write
** the part.
**
** Why the check: a feature's fate in the neighbour stage depends on its
** partners (features whose box meets its box) and, for near-duplicates,
** on the whole chain of near-duplicate pairs it belongs to (keepers are
** chosen greedily along it). A feature whose box lies inside the read box
** has all its partners read. So the decisions about an owned feature are
** those of a single run when its chain, and the chains of its partners,
** consist of such features. When they do not, the run says how wide a
** halo would be and the caller reads again with it.
**
** Errors:  ST_ERR_NOMEM; the part writer's errors (part.h).
*/
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "stocktake/part.h"
#include "stocktake/report.h"
#include "stocktake/sha256.h"
#include "pipelineInt.h"

/* ---- ownership and the halo check -------------------------------------- */

enum { ROLE_HALO = 0, ROLE_OWNED = 1, ROLE_SHARED = 2 };

static uint32_t uf_find(uint32_t *up, uint32_t i)
{
    while (up[i] != i) {
        up[i] = up[up[i]];
        i = up[i];
    }
    return i;
}

/* 1 when f's box lies inside the read box (or f has no coordinates). */
static int complete(const run_state *s, const st_feature *f, double *overreach)
{
    double b[4];
    if (!st_geom_bbox(&f->geom, b))
        return 1;
    const double *r = s->read_box;
    if (b[0] >= r[0] && b[2] <= r[2] && b[1] >= r[1] && b[3] <= r[3])
        return 1;
    double o = st_window_overreach_m(s->window, b);
    if (o > *overreach)
        *overreach = o;
    return 0;
}

typedef struct tile_check {
    uint8_t *role;               /* per feature */
    uint32_t *up;                /* union-find over near-duplicate pairs */
    uint8_t *whole;              /* per chain root: every member complete */
} tile_check;

static void tile_check_free(tile_check *t)
{
    st_free(t->role);
    st_free(t->up);
    st_free(t->whole);
}

static void assign_roles(run_state *s, tile_check *t)
{
    for (size_t i = 0; i < s->nfeatures; i++) {
        double xy[2];
        if (!st_tile_point(s->gx, &s->features[i]->geom, xy))
            t->role[i] = ROLE_SHARED;
        else
            t->role[i] = st_window_owns(s->window, xy[0], xy[1]) ? ROLE_OWNED : ROLE_HALO;
    }
}

#define WHOLE  1u    /* a chain: every member's box inside the read box */
#define NEEDED 2u    /* a chain an owned feature depends on */

/* The metres the halo lacks (0: it held every decision). */
static double halo_shortfall(run_state *s, tile_check *t)
{
    size_t n = s->nfeatures;
    for (size_t i = 0; i < n; i++)
        t->up[i] = (uint32_t)i;
    for (size_t k = 0; k < s->nlinks; k++)
        if (s->links[k].near) {
            uint32_t a = uf_find(t->up, s->links[k].a), b = uf_find(t->up, s->links[k].b);
            if (a != b)
                t->up[a > b ? a : b] = a < b ? a : b;
        }
    double unused = 0;
    memset(t->whole, WHOLE, n);
    for (size_t i = 0; i < n; i++)
        if (!complete(s, s->features[i], &unused))
            t->whole[uf_find(t->up, (uint32_t)i)] &= (uint8_t)~WHOLE;
    /* an owned feature depends on its own chain and on its partners' */
    for (size_t i = 0; i < n; i++)
        if (t->role[i] == ROLE_OWNED)
            t->whole[uf_find(t->up, (uint32_t)i)] |= NEEDED;
    for (size_t k = 0; k < s->nlinks; k++) {
        uint32_t a = s->links[k].a, b = s->links[k].b;
        if (t->role[a] == ROLE_OWNED)
            t->whole[uf_find(t->up, b)] |= NEEDED;
        if (t->role[b] == ROLE_OWNED)
            t->whole[uf_find(t->up, a)] |= NEEDED;
    }
    double need = 0;
    for (size_t i = 0; i < n; i++)
        if (t->whole[uf_find(t->up, (uint32_t)i)] == NEEDED)
            (void)complete(s, s->features[i], &need);
    return need;
}

/* Keep the owned and shared features (and their findings); free the rest. */
static st_status cut(run_state *s, const tile_check *t)
{
    size_t n = s->nfeatures, k = 0;
    uint8_t *shared = st_malloc(n ? n : 1);
    if (!shared)
        return ST_ERR_NOMEM;
    for (size_t i = 0; i < n; i++) {
        st_feature *f = s->features[i];
        if (t->role[i] == ROLE_HALO) {
            st_feature_free(f);
            continue;
        }
        shared[k] = t->role[i] == ROLE_SHARED;
        s->features[k++] = f;
    }
    s->nfeatures = k;
    st_free(s->shared);
    s->shared = shared;
    /* the features are in bid order: keep the findings of those left */
    st_findings *fl = &s->findings;
    size_t w = 0;
    for (size_t i = 0; i < fl->count; i++) {
        uint64_t bid = fl->items[i].bid;
        size_t lo = 0, hi = k;
        while (lo < hi) {
            size_t mid = lo + (hi - lo) / 2;
            if (s->features[mid]->bid < bid)
                lo = mid + 1;
            else
                hi = mid;
        }
        if (lo < k && s->features[lo]->bid == bid)
            fl->items[w++] = fl->items[i];
        else
            st_free(fl->items[i].message);
    }
    fl->count = w;
    return ST_OK;
}

st_status st_run_tile_cut(run_state *s, double *need_m)
{
    size_t n = s->nfeatures;
    tile_check t = {st_malloc(n + 1), st_malloc((n + 1) * sizeof *t.up), st_malloc(n + 1)};
    st_status rc = t.role && t.up && t.whole ? ST_OK : ST_ERR_NOMEM;
    *need_m = 0;
    if (rc == ST_OK) {
        assign_roles(s, &t);
        *need_m = halo_shortfall(s, &t);
    }
    if (rc == ST_OK && *need_m <= 0)
        rc = cut(s, &t);
    tile_check_free(&t);
    st_free(s->links);
    s->links = NULL;
    s->nlinks = 0;
    return rc;
}

/* ---- the context a part records and merge compares ---------------------- */

static st_status hash_into(st_buf *b, const char *role, const char *path, st_diags *diags)
{
    st_report_file f;
    memset(&f, 0, sizeof f);
    f.role = role;
    f.path = path;
    st_status rc = st_report_hash_files(&f, 1, diags);
    if (rc == ST_OK)
        rc = st_buf_printf(b, "%s%s sha256 %s", b->len ? "; " : "", path, f.sha256);
    return rc;
}

void st_run_context_free(run_context *c)
{
    for (size_t i = 0; i < c->n; i++)
        st_free(c->values[i]);
    memset(c, 0, sizeof *c);
}

static st_status context_add(run_context *c, const char *key, st_buf *b)
{
    char *v = st_buf_take(b);
    if (!v && !(v = st_strdup("")))
        return ST_ERR_NOMEM;
    c->keys[c->n] = key;
    c->values[c->n++] = v;
    return ST_OK;
}

st_status st_run_context_make(run_state *s, run_context *c)
{
    const st_run_options *o = s->opt;
    memset(c, 0, sizeof *c);
    st_buf b;
    st_buf_init(&b, 0);
    st_status rc = ST_OK;
    for (size_t i = 0; rc == ST_OK && i < o->nrules; i++)
        rc = hash_into(&b, "rules", o->rules[i], s->diags);
    for (size_t i = 0; rc == ST_OK && s->rules && i < st_rules_table_count(s->rules); i++)
        rc = hash_into(&b, "defaults table", st_rules_table(s->rules, i)->path, s->diags);
    if (rc == ST_OK && s->rules) {   /* the included files too */
        char hex[65];
        st_rules_digest(s->rules, hex);
        rc = st_buf_printf(&b, "; texts sha256 %s", hex);
    }
    if (rc == ST_OK)
        rc = context_add(c, "context.rules", &b);
    if (rc == ST_OK && o->districts)
        rc = hash_into(&b, "districts", o->districts, s->diags);
    if (rc == ST_OK && o->districts)
        rc = st_buf_printf(&b, "; key %s; region %s", o->district_key ? o->district_key : "",
                           o->region_key ? o->region_key : "");
    if (rc == ST_OK)
        rc = context_add(c, "context.districts", &b);
    if (rc == ST_OK && o->reference)
        rc = hash_into(&b, "reference", o->reference, s->diags);
    if (rc == ST_OK)
        rc = context_add(c, "context.reference", &b);
    if (rc == ST_OK)
        rc = st_buf_printf(&b, "%s; seed %llu; crs %s", st_fill_mode_name(o->fill),
                           (unsigned long long)o->seed, o->crs_override ? o->crs_override : "");
    if (rc == ST_OK)
        rc = context_add(c, "context.options", &b);
    st_buf_free(&b);
    if (rc != ST_OK)
        st_run_context_free(c);
    return rc;
}

void st_run_layer_facts_digest(const run_state *s, char hex[65])
{
    st_buf b;
    st_buf_init(&b, 0);
    st_status rc = ST_OK;
    for (size_t l = 0; rc == ST_OK && l < s->res->nlayers; l++) {
        const st_footprint_extent *e = &s->extents[l];
        rc = st_buf_printf(&b, "layer %zu read %llu extent %d %.17g %.17g %.17g %.17g fields",
                           l, (unsigned long long)s->res->layers[l].read, e->valid,
                           e->valid ? e->xmin : 0, e->valid ? e->ymin : 0,
                           e->valid ? e->xmax : 0, e->valid ? e->ymax : 0);
        for (uint32_t k = 0; rc == ST_OK && k < s->fields[l].count; k++)
            rc = st_buf_printf(&b, " %d", (int)s->fields[l].items[k].type);
        if (rc == ST_OK)
            rc = st_buf_puts(&b, "\n");
    }
    /* no memory: a digest no part can match, so merge refuses */
    st_sha256_hex(rc == ST_OK && b.data ? b.data : "?", rc == ST_OK ? b.len : 1, hex);
    st_buf_free(&b);
}

/* ---- writing the part ---------------------------------------------------- */

static st_status write_info(run_state *s, st_part_writer *w, const run_context *c)
{
    char halo[32], when[32], facts[65];
    st_run_layer_facts_digest(s, facts);
    snprintf(halo, sizeof halo, "%.1f", s->halo_m);
    st_now_iso8601(when);
    const char *kv[2 * (RUN_CONTEXT_MAX + 7)];
    size_t n = 0;
    kv[2 * n] = "tool", kv[2 * n++ + 1] = "stocktake " ST_VERSION;
    kv[2 * n] = "command", kv[2 * n++ + 1] = s->opt->command_line ? s->opt->command_line : "";
    kv[2 * n] = "window", kv[2 * n++ + 1] = s->window->label;
    kv[2 * n] = "halo_m", kv[2 * n++ + 1] = halo;
    kv[2 * n] = "started", kv[2 * n++ + 1] = s->started;
    kv[2 * n] = "finished", kv[2 * n++ + 1] = when;
    kv[2 * n] = "layer_facts", kv[2 * n++ + 1] = facts;
    for (size_t i = 0; i < c->n; i++)
        kv[2 * n] = c->keys[i], kv[2 * n++ + 1] = c->values[i];
    return st_part_write_info(w, kv, n);
}

static st_status write_layers(run_state *s, st_part_writer *w)
{
    size_t nl = s->res->nlayers;
    st_part_layer *pl = st_calloc(nl ? nl : 1, sizeof *pl);
    if (!pl)
        return ST_ERR_NOMEM;
    for (size_t l = 0; l < nl; l++) {
        const st_run_layer *L = &s->res->layers[l];
        pl[l].name = L->name;
        pl[l].path = L->path;
        pl[l].format = L->format;
        pl[l].crs = L->crs;
        pl[l].read = L->read;
        pl[l].fields = s->fields[l];   /* shallow: borrowed by the writer */
    }
    st_status rc = st_part_write_layers(w, pl, nl);
    st_free(pl);
    return rc;
}

static st_status write_unmapped(run_state *s, st_part_writer *w)
{
    const st_run_result *r = s->res;
    size_t n = r->nunmapped;
    const char **field = st_calloc(n + 1, sizeof *field);
    const char **value = st_calloc(n + 1, sizeof *value);
    uint64_t *count = st_calloc(n + 1, sizeof *count);
    st_status rc = field && value && count ? ST_OK : ST_ERR_NOMEM;
    for (size_t i = 0; rc == ST_OK && i < n; i++) {
        field[i] = r->unmapped[i].field;
        value[i] = r->unmapped[i].value;
        count[i] = r->unmapped[i].count;
    }
    uint64_t dropped = s->unmapped ? st_unmapped_dropped(s->unmapped) : 0;
    if (rc == ST_OK)
        rc = st_part_write_unmapped(w, field, value, count, n, dropped);
    st_free(field);
    st_free(value);
    st_free(count);
    return rc;
}

st_status st_stage_write_part(run_state *s)
{
    run_context c;
    st_status rc = st_run_context_make(s, &c);
    if (rc != ST_OK)
        return rc;
    st_part_writer *w = NULL;
    st_run_progress(s, "write", 0, (long long)s->nfeatures);
    rc = st_part_writer_open(s->opt->output, s->diags, &w);
    if (rc == ST_OK)
        rc = write_info(s, w, &c);
    if (rc == ST_OK)
        rc = write_layers(s, w);
    for (size_t i = 0; rc == ST_OK && i < s->nfeatures; i++)
        rc = st_part_write_feature(w, s->features[i], s->shared[i]);
    if (rc == ST_OK)
        rc = st_part_write_findings(w, &s->findings);
    if (rc == ST_OK)
        rc = write_unmapped(s, w);
    if (rc == ST_OK)
        rc = st_run_check_stop(s);   /* the last moment to leave nothing */
    if (rc == ST_OK)
        rc = st_part_writer_commit(w);
    st_part_writer_close(w);
    st_run_context_free(&c);
    if (rc == ST_OK && !(s->res->outputs = st_calloc(1, sizeof *s->res->outputs)))
        rc = ST_ERR_NOMEM;
    if (rc == ST_OK && !(s->res->outputs[0] = st_strdup(s->opt->output)))
        rc = ST_ERR_NOMEM;
    if (rc == ST_OK)
        s->res->noutputs = 1;
    return rc;
}
