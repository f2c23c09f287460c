/*
** pipeline/pool.c -- a small pool of worker threads for the per-feature
** stages: chunks of features are handed out in order to whichever worker
** is free; each worker keeps its own GEOS context, checker or rule
** context (indexed by the worker number the task receives).
**
** Input:   a task function, its context, a number of chunks and threads.
** Output:  every chunk run exactly once (unless a task fails: then no new
**          chunk is started and the failure of the lowest chunk is
**          returned, so the same input fails the same way for any -j).
** Determinism: the pool decides only who runs a chunk and when; tasks
**          write their results per chunk, and the caller merges them in
**          chunk order, so the results do not depend on the thread count.
** Errors:  a thread that cannot be started is not an error: the chunks go
**          to the workers that did start (the calling thread always does).
** Limits:  ST_POOL_MAX_THREADS workers.
*/
#include <pthread.h>
#include <unistd.h>

#include "pipelineInt.h"

typedef struct pool {
    pthread_mutex_t lock;
    size_t next;                 /* next chunk to hand out */
    size_t nchunks;
    size_t failed_chunk;         /* lowest failed chunk, or nchunks */
    st_status failed;
    st_pool_task task;
    void *ctx;
} pool;

typedef struct worker_arg {
    pool *p;
    unsigned worker;
} worker_arg;

/* The next chunk for a worker, or nchunks when there is none (all handed
** out, or a chunk failed). */
static size_t take_chunk(pool *p)
{
    pthread_mutex_lock(&p->lock);
    size_t c = p->failed != ST_OK ? p->nchunks : p->next;
    if (c < p->nchunks)
        p->next++;
    pthread_mutex_unlock(&p->lock);
    return c;
}

static void report_failure(pool *p, size_t chunk, st_status rc)
{
    pthread_mutex_lock(&p->lock);
    if (p->failed == ST_OK || chunk < p->failed_chunk) {
        p->failed = rc;
        p->failed_chunk = chunk;
    }
    pthread_mutex_unlock(&p->lock);
}

static void *work(void *arg)
{
    worker_arg *a = arg;
    pool *p = a->p;
    for (size_t c = take_chunk(p); c < p->nchunks; c = take_chunk(p)) {
        st_status rc = p->task(p->ctx, a->worker, c);
        if (rc != ST_OK)
            report_failure(p, c, rc);
    }
    return NULL;
}

unsigned st_pool_threads(unsigned requested)
{
    if (requested == 0) {
        long n = sysconf(_SC_NPROCESSORS_ONLN);
        requested = n > 0 ? (unsigned)n : 1;
    }
    return requested > ST_POOL_MAX_THREADS ? ST_POOL_MAX_THREADS : requested;
}

st_status st_pool_run(unsigned nthreads, size_t nchunks, st_pool_task task, void *ctx)
{
    if (nthreads < 1)
        nthreads = 1;
    if (nthreads > ST_POOL_MAX_THREADS)
        nthreads = ST_POOL_MAX_THREADS;
    if ((size_t)nthreads > nchunks)
        nthreads = nchunks ? (unsigned)nchunks : 1;
    pool p;
    p.next = 0;
    p.nchunks = nchunks;
    p.failed_chunk = nchunks;
    p.failed = ST_OK;
    p.task = task;
    p.ctx = ctx;
    if (pthread_mutex_init(&p.lock, NULL) != 0)
        return ST_ERR_NOMEM;
    pthread_t tid[ST_POOL_MAX_THREADS];
    worker_arg args[ST_POOL_MAX_THREADS];
    unsigned started = 0;
    for (unsigned w = 1; w < nthreads; w++) {
        args[w] = (worker_arg){&p, w};
        if (pthread_create(&tid[started + 1], NULL, work, &args[w]) != 0)
            break;
        started++;
    }
    args[0] = (worker_arg){&p, 0};
    work(&args[0]);
    for (unsigned k = 1; k <= started; k++)
        pthread_join(tid[k], NULL);
    pthread_mutex_destroy(&p.lock);
    return p.failed;
}
