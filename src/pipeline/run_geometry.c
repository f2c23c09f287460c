/*
** pipeline/run_geometry.c -- the two geometry stages on the worker pool:
** footprint checks and repair (chunks never cross a layer, since the
** swapped-axes check uses the layer's robust extent), then the neighbour
** stage (exact duplicates and the index in this thread, scans on the pool,
** near-duplicate keepers and overlap findings in this thread).
*/
#include <string.h>

#include "pipelineInt.h"

/* ---- footprint stage ---------------------------------------------------- */

typedef struct fp_job {
    run_state *s;
    const run_chunk *chunks;
    st_footprint_checker **ck;     /* one per worker */
    const st_footprint_extent *ext;/* one per layer */
    st_findings *out;              /* one per chunk */
} fp_job;

static st_status fp_task(void *ctx, unsigned worker, size_t c)
{
    fp_job *j = ctx;
    const run_chunk *k = &j->chunks[c];
    st_footprint_checker *ck = j->ck[worker];
    st_footprint_checker_set_extent(ck, &j->ext[k->layer]);
    st_status rc = ST_OK;
    for (size_t i = k->first; rc == ST_OK && i < k->end; i++)
        rc = st_footprint_check(ck, &j->s->fcfg, j->s->features[i], &j->out[c]);
    st_run_chunk_progress(j->s, worker, "footprints", k->end);
    return rc;
}

st_status st_stage_footprints(run_state *s)
{
    size_t nchunks = 0;
    run_chunk *chunks = st_run_chunks_make(s, &nchunks);
    fp_job j = {s, chunks, st_calloc(s->threads, sizeof *j.ck), s->extents,
                st_run_chunk_findings_new(nchunks)};
    st_status rc = chunks && j.ck && j.out ? ST_OK : ST_ERR_NOMEM;
    for (unsigned w = 0; rc == ST_OK && w < s->threads; w++)
        rc = st_footprint_checker_new(&j.ck[w]);
    if (rc == ST_OK)
        rc = st_pool_run(s->threads, nchunks, fp_task, &j);
    rc = st_run_chunk_findings_merge(s, j.out, nchunks, rc);
    for (unsigned w = 0; j.ck && w < s->threads; w++)
        st_footprint_checker_free(j.ck[w]);
    st_free(j.ck);
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
    st_run_chunk_progress(j->s, worker, "neighbours", end);
    return rc;
}

/* begin (exact duplicates, index) in this thread, scans of chunks of the
** index on the pool, finish (near duplicates, overlaps) in this thread. */
st_status st_stage_neighbours(run_state *s)
{
    const char **names = st_calloc(s->res->nlayers, sizeof *names);
    if (!names)
        return ST_ERR_NOMEM;
    for (size_t l = 0; l < s->res->nlayers; l++)
        names[l] = s->res->layers[l].name;
    st_neighbours_input in = {s->features, s->nfeatures, names, (uint32_t)s->res->nlayers};
    st_run_progress(s, "neighbours", 0, (long long)s->nfeatures);
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
    st_run_chunk_diags_merge(s, j.diags, j.diags ? nchunks : 0);
    if (rc == ST_OK)
        rc = st_neighbours_finish(nb, j.pairs, nchunks, &s->findings, s->diags);
    if (rc == ST_OK && s->window)   /* a part checks its halo with them */
        rc = st_neighbours_links(nb, j.pairs, nchunks, &s->links, &s->nlinks);
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

