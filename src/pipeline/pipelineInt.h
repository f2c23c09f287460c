/*
** pipeline/pipelineInt.h -- private to the pipeline module.
*/
#ifndef STOCKTAKE_PIPELINE_INT_H
#define STOCKTAKE_PIPELINE_INT_H

#include "stocktake/footprint.h"
#include "stocktake/neighbours.h"
#include "stocktake/rules.h"

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
