/*
** pipeline/pipelineInt.h -- private to the pipeline module.
*/
#ifndef STOCKTAKE_PIPELINE_INT_H
#define STOCKTAKE_PIPELINE_INT_H

#include "stocktake/footprint.h"
#include "stocktake/neighbours.h"
#include "stocktake/rules.h"

#include "stocktake/audit.h"
#include "stocktake/defaults.h"
#include "stocktake/finding.h"
#include "stocktake/geomx.h"
#include "stocktake/pipeline.h"
#include "stocktake/place.h"
#include "stocktake/report.h"
#include "guardInt.h"

/* ---- the state of one run (pipeline.c owns it; each stage fills a part) -- */


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


/* The features split into chunks of at most ST_POOL_CHUNK, never across a
** layer boundary (the footprint check depends on the layer's extent). */
typedef struct run_chunk {
    size_t first, end;
    uint32_t layer;
} run_chunk;

/* ---- shared by the stages (run_chunks.c) ---------------------------------- */

void st_run_progress(run_state *s, const char *stage, long long done, long long total);
/* Owned array of chunks (*n of them), or NULL on no memory. */
run_chunk *st_run_chunks_make(run_state *s, size_t *n);
/* n empty finding lists, one per chunk, or NULL. */
st_findings *st_run_chunk_findings_new(size_t n);
/* Move each chunk's findings into the run's in chunk order (unless rc is
** already a failure) and free them; returns rc or the first failure. */
st_status st_run_chunk_findings_merge(run_state *s, st_findings *f, size_t n, st_status rc);
/* Add each chunk's diagnostics to the run's, in chunk order, and free them. */
void st_run_chunk_diags_merge(run_state *s, st_diags *d, size_t n);
/* Progress of a pool stage, reported by worker 0 (the calling thread). */
void st_run_chunk_progress(run_state *s, unsigned worker, const char *stage, size_t done);

/* ---- the stages, in run order (each: ST_OK or the failure that stops) ---- */

st_status st_stage_read(run_state *s);          /* run_read.c */
st_status st_stage_footprints(run_state *s);    /* run_geometry.c */
st_status st_stage_neighbours(run_state *s);
st_status st_stage_place(run_state *s);         /* run_attrs.c */
st_status st_stage_rules(run_state *s);
/* Read the defaults tables before any data (a bad table stops early). */
st_status st_run_prepare_defaults(run_state *s);
st_status st_stage_defaults(run_state *s);
st_status st_stage_findings(run_state *s);      /* run_tally.c */
st_status st_stage_audit(run_state *s);
st_status st_stage_gate(run_state *s);
st_status st_stage_summary(run_state *s);       /* run_write.c */
st_status st_stage_write(run_state *s);

/*
** Carry a rule set's `footprint` block onto the two geometry stages'
** configurations. 'r' borrowed (NULL: nothing to do). An unknown name, a
** wrong unit or a value out of range is an ST_ERR_RULE diagnostic at the
** setting's file:line; the configurations are then partly set and the run
** must stop.
*/
st_status st_settings_apply(const st_rules *r, st_footprint_config *fc,
                            st_neighbours_config *nc, st_diags *diags) ST_MUST_CHECK;

/* ---- worker pool (pipeline/pool.c) ------------------------------------ */

#define ST_POOL_MAX_THREADS 64

/* Features per chunk of work: fixed, so that the per-chunk results (and
** their merge in chunk order) are the same for any number of threads. */
#define ST_POOL_CHUNK 4096

/* One chunk of work for worker 'worker' (0 .. threads-1; worker 0 is the
** calling thread). Returns ST_OK or the failure that stops the stage. */
typedef st_status (*st_pool_task)(void *ctx, unsigned worker, size_t chunk);

/* The number of workers for -j 'requested': 0 means the online cores;
** at most ST_POOL_MAX_THREADS. */
unsigned st_pool_threads(unsigned requested);

/*
** Run task(ctx, worker, c) for every chunk c in [0, nchunks) on up to
** 'nthreads' workers (the calling thread is worker 0). Returns ST_OK, or
** the status of the lowest failed chunk (no chunk starts after a failure;
** chunks already running finish). ST_ERR_NOMEM when no lock can be made.
*/
st_status st_pool_run(unsigned nthreads, size_t nchunks, st_pool_task task,
                      void *ctx) ST_MUST_CHECK;

#endif
