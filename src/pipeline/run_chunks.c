/*
** pipeline/run_chunks.c -- the pieces every per-feature stage shares:
** progress, the fixed chunks of work handed to the pool, and the merge of
** each chunk's findings and diagnostics in chunk order (which is what makes
** the outputs the same for any -j).
*/
#include <string.h>

#include "pipelineInt.h"

void st_run_progress(run_state *s, const char *stage, long long done, long long total)
{
    if (s->opt->progress)
        s->opt->progress(s->opt->progress_ud, stage, done, total);
}

st_status st_run_check_stop(run_state *s)
{
    if (!s->opt->stop || !*s->opt->stop)
        return ST_OK;
    return st_diags_add(s->diags, ST_SEV_ERROR, ST_ERR_STOPPED, NULL,
                        "interrupted; nothing was written");
}
run_chunk *st_run_chunks_make(run_state *s, size_t *n)
{
    size_t cap = s->nfeatures / ST_POOL_CHUNK + s->res->nlayers + 1;
    run_chunk *c = st_malloc(cap * sizeof *c);
    *n = 0;
    if (!c)
        return NULL;
    for (size_t i = 0; i < s->nfeatures;) {
        uint32_t layer = s->features[i]->layer;
        size_t end = i;
        while (end < s->nfeatures && end - i < ST_POOL_CHUNK && s->features[end]->layer == layer)
            end++;
        c[(*n)++] = (run_chunk){i, end, layer};
        i = end;
    }
    return c;
}

/* Per-chunk findings, then moved into the run's list in chunk order. */
st_findings *st_run_chunk_findings_new(size_t n)
{
    st_findings *f = st_calloc(n ? n : 1, sizeof *f);
    for (size_t i = 0; f && i < n; i++)
        st_findings_init(&f[i]);
    return f;
}

st_status st_run_chunk_findings_merge(run_state *s, st_findings *f, size_t n, st_status rc)
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
void st_run_chunk_diags_merge(run_state *s, st_diags *d, size_t n)
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
void st_run_chunk_progress(run_state *s, unsigned worker, const char *stage, size_t done)
{
    if (worker == 0)
        st_run_progress(s, stage, (long long)done, (long long)s->nfeatures);
}

