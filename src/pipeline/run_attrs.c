/*
** pipeline/run_attrs.c -- the attribute stages: placement in districts,
** the rules (map, derive, check) and the defaults, all per building on the
** worker pool; unmapped source values are counted per worker and summed.
*/
#include <stdint.h>
#include <string.h>

#include "pipelineInt.h"

/* The unmapped values of the run, most frequent first, copied into the
** result so they outlive the rule context. */
st_status st_run_keep_unmapped(run_state *s, const st_unmapped *u)
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
    const run_chunk *chunks;
    st_rules_ctx **ctx;            /* one per worker */
    st_findings *out;              /* one per chunk */
} rules_job;

static st_status rules_task(void *ctx, unsigned worker, size_t c)
{
    rules_job *j = ctx;
    const run_chunk *k = &j->chunks[c];
    st_rules_ctx *rc_ctx = j->ctx[worker];
    st_rules_ctx_reset_layer(rc_ctx);
    st_status rc = ST_OK;
    for (size_t i = k->first; rc == ST_OK && i < k->end; i++) {
        st_feature *f = j->s->features[i];
        if (f->status == ST_STATUS_OK || f->status == ST_STATUS_REPAIRED)
            rc = st_rules_apply(rc_ctx, f, &j->s->fields[f->layer], &j->out[c]);
    }
    st_run_chunk_progress(j->s, worker, "rules", k->end);
    return rc;
}

/* map -> derive -> check on every kept building; each worker counts its
** unmapped values, and the counts are added up (a sum: any order). */
st_status st_stage_rules(run_state *s)
{
    if (!s->rules)
        return ST_OK;
    size_t nchunks = 0;
    run_chunk *chunks = st_run_chunks_make(s, &nchunks);
    rules_job j = {s, chunks, st_calloc(s->threads, sizeof *j.ctx), st_run_chunk_findings_new(nchunks)};
    st_status rc = chunks && j.ctx && j.out ? ST_OK : ST_ERR_NOMEM;
    for (unsigned w = 0; rc == ST_OK && w < s->threads; w++)
        rc = st_rules_ctx_new(s->rules, &j.ctx[w]);
    if (rc == ST_OK)
        rc = st_pool_run(s->threads, nchunks, rules_task, &j);
    rc = st_run_chunk_findings_merge(s, j.out, nchunks, rc);
    for (unsigned w = 1; rc == ST_OK && w < s->threads; w++)
        rc = st_unmapped_merge(st_rules_ctx_unmapped(j.ctx[0]), st_rules_ctx_unmapped(j.ctx[w]));
    if (rc == ST_OK)
        rc = st_run_keep_unmapped(s, st_rules_ctx_unmapped(j.ctx[0]));
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

st_status st_stage_place(run_state *s)
{
    if (!s->districts)
        return ST_OK;
    st_run_progress(s, "place", 0, (long long)s->nfeatures);
    st_place_stats stats;
    return st_place_features(s->districts, s->features, s->nfeatures, s->threads,
                             ST_SEV_WARNING, &s->findings, s->diags, &stats);
}

/* Read the defaults tables now: a bad table stops the run before any data
** is read. */
st_status st_run_prepare_defaults(run_state *s)
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
    const run_chunk *chunks;
    st_rules_ctx **ctx;            /* one per worker */
    size_t skip;                   /* the building already filled */
} defaults_job;

static st_status defaults_task(void *ctx, unsigned worker, size_t c)
{
    defaults_job *j = ctx;
    const run_chunk *k = &j->chunks[c];
    st_status rc = ST_OK;
    for (size_t i = k->first; rc == ST_OK && i < k->end; i++)
        if (i != j->skip && is_kept(j->s->features[i]))
            rc = st_defaults_apply(j->s->defaults, j->ctx[worker], j->s->features[i],
                                   j->s->opt->fill, j->s->opt->seed);
    st_run_chunk_progress(j->s, worker, "defaults", k->end);
    return rc;
}

/* Learn from the observed values, then fill what is still unknown. The
** first building is filled here, which makes the defaults build their
** tables (they do it on first use); after that st_defaults_apply only
** reads them, and each building's values depend on that building alone
** (the draw hashes seed, bid and field), so the rest go to the pool. */
st_status st_stage_defaults(run_state *s)
{
    if (!s->rules)
        return ST_OK;
    st_run_progress(s, "defaults", 0, (long long)s->nfeatures);
    size_t nchunks = 0;
    run_chunk *chunks = st_run_chunks_make(s, &nchunks);
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

