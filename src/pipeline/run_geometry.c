/*
** pipeline/run_geometry.c -- the two geometry stages on the worker pool:
** footprint checks and repair, begun while the read stage reads (chunks
** never cross a layer, since the swapped-axes check uses the layer's robust
** extent, known only after the read: see below), then the neighbour
** stage (exact duplicates and the index in this thread, scans on the pool,
** near-duplicate keepers and overlap findings in this thread).
*/
#include <string.h>

#include "pipelineInt.h"

/* ---- footprint stage ----------------------------------------------------
**
** The checks run while the read stage reads: each chunk of ST_POOL_CHUNK
** features (never across a layer) goes to the pool as soon as it is read,
** checked with no extent, since the layer's robust extent is known only
** once its last feature is read. The footprint stage then waits for the
** last chunks and, per chunk on the pool, checks again with the extent
** every footprint the swapped-axes check could fire on
** (st_footprint_swap_suspect), after undoing its first check, and puts its
** findings where the first check's were (a footprint's findings are
** contiguous in its chunk's list). Every other footprint's outcome does
** not depend on the extent, so features and findings are those of a check
** with the extent from the start, for any -j.
*/

typedef struct fp_chunk {
    st_feature **features;         /* owned copy of the chunk's pointers
                                      (s->features moves while reading);
                                      freed once checked */
    size_t first, n;               /* s->features[first .. first+n) */
    uint32_t layer;
    st_findings out;
} fp_chunk;

struct fp_overlap {
    run_state *s;
    st_footprint_checker **ck;     /* one per worker */
    fp_chunk **chunks;             /* in read order; the reader's array */
    size_t nchunks, capchunks;
    size_t pending;                /* first feature not yet in a chunk */
    st_feed *feed;
};

static void fp_overlap_free(struct fp_overlap *o)
{
    for (size_t c = 0; c < o->nchunks; c++) {
        st_free(o->chunks[c]->features);
        st_findings_free(&o->chunks[c]->out);
        st_free(o->chunks[c]);
    }
    st_free(o->chunks);
    for (unsigned w = 0; o->ck && w < o->s->threads; w++)
        st_footprint_checker_free(o->ck[w]);
    st_free(o->ck);
    st_free(o);
}

/* The first check of a chunk, while reading: no extent. */
static st_status fp_first(void *ctx, unsigned worker, size_t c, void *item)
{
    (void)c;
    struct fp_overlap *o = ctx;
    fp_chunk *k = item;
    st_footprint_checker *ck = o->ck[worker];
    st_footprint_checker_set_extent(ck, NULL);
    st_status rc = ST_OK;
    for (size_t i = 0; rc == ST_OK && i < k->n; i++)
        rc = st_footprint_check(ck, &o->s->fcfg, k->features[i], &k->out);
    st_free(k->features);
    k->features = NULL;
    return rc;
}

st_status st_run_footprints_begin(run_state *s)
{
    struct fp_overlap *o = st_calloc(1, sizeof *o);
    if (!o)
        return ST_ERR_NOMEM;
    o->s = s;
    o->pending = s->nfeatures;
    s->fp = o;
    o->ck = st_calloc(s->threads, sizeof *o->ck);
    st_status rc = o->ck ? ST_OK : ST_ERR_NOMEM;
    for (unsigned w = 0; rc == ST_OK && w < s->threads; w++)
        rc = st_footprint_checker_new(&o->ck[w]);
    if (rc == ST_OK)
        rc = st_feed_start(s->threads, fp_first, o, &o->feed);
    if (rc != ST_OK)
        st_run_footprints_cancel(s);
    return rc;
}

st_status st_run_footprints_feed(run_state *s, int layer_end)
{
    struct fp_overlap *o = s->fp;
    size_t n = s->nfeatures - o->pending;
    if (n == 0 || (n < ST_POOL_CHUNK && !layer_end))
        return ST_OK;
    if (o->nchunks == o->capchunks) {
        size_t cap = o->capchunks ? 2 * o->capchunks : 64;
        fp_chunk **a = st_realloc(o->chunks, cap * sizeof *a);
        if (!a)
            return ST_ERR_NOMEM;
        o->chunks = a;
        o->capchunks = cap;
    }
    fp_chunk *k = st_calloc(1, sizeof *k);
    if (!k)
        return ST_ERR_NOMEM;
    k->features = st_malloc(n * sizeof *k->features);
    if (!k->features) {
        st_free(k);
        return ST_ERR_NOMEM;
    }
    memcpy(k->features, s->features + o->pending, n * sizeof *k->features);
    k->first = o->pending;
    k->n = n;
    k->layer = s->features[o->pending]->layer;
    st_findings_init(&k->out);
    o->chunks[o->nchunks++] = k;
    o->pending = s->nfeatures;
    return st_feed_publish(o->feed, k);
}

void st_run_footprints_cancel(run_state *s)
{
    struct fp_overlap *o = s->fp;
    if (!o)
        return;
    s->fp = NULL;
    (void)st_feed_finish(o->feed, 1);
    fp_overlap_free(o);
}

/* Check f again, with its layer's extent, in place of its first check
** whose findings start at out->items[*pos] or after; *pos moves past
** them. */
static st_status fp_again(st_footprint_checker *ck, const st_footprint_config *cfg,
                          st_feature *f, st_findings *out, size_t *pos)
{
    size_t a = *pos;
    while (a < out->count && out->items[a].bid < f->bid)
        a++;
    size_t b = a;
    while (b < out->count && out->items[b].bid == f->bid)
        b++;
    st_findings again;
    st_findings_init(&again);
    st_footprint_reset(f);
    st_status rc = st_footprint_check(ck, cfg, f, &again);
    size_t n = again.count;
    if (rc == ST_OK)
        rc = st_findings_replace(out, a, b - a, &again);
    st_findings_free(&again);
    *pos = a + n;
    return rc;
}

/* After the read: the footprints of chunk c the swapped-axes check could
** fire on, checked again with the layer's extent. */
static st_status fp_second(void *ctx, unsigned worker, size_t c)
{
    struct fp_overlap *o = ctx;
    run_state *s = o->s;
    fp_chunk *k = o->chunks[c];
    const st_footprint_extent *ext = &s->extents[k->layer];
    st_footprint_checker *ck = o->ck[worker];
    st_footprint_checker_set_extent(ck, ext);
    st_status rc = ST_OK;
    size_t pos = 0;
    for (size_t i = k->first; rc == ST_OK && ext->valid && i < k->first + k->n; i++)
        if (st_footprint_swap_suspect(ext, s->features[i]))
            rc = fp_again(ck, &s->fcfg, s->features[i], &k->out, &pos);
    st_run_chunk_progress(s, worker, "footprints", k->first + k->n);
    return rc;
}

st_status st_stage_footprints(run_state *s)
{
    struct fp_overlap *o = s->fp;
    if (!o)
        return st_diags_add(s->diags, ST_SEV_ERROR, ST_ERR_USAGE, NULL,
                            "footprint stage without a read");
    s->fp = NULL;
    st_status rc = st_feed_finish(o->feed, 0);
    o->feed = NULL;
    if (rc == ST_OK)
        rc = st_pool_run(s->threads, o->nchunks, fp_second, o);
    for (size_t c = 0; c < o->nchunks; c++)
        if (rc == ST_OK)
            rc = st_findings_move(&s->findings, &o->chunks[c]->out);
    fp_overlap_free(o);
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

