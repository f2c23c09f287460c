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
** Feed:    st_feed_* runs chunks while the caller is still making them
**          (the footprint checks while the read stage reads): workers wait
**          on a condition variable for each published chunk; with one
**          thread the caller runs each chunk as it publishes it. Each chunk
**          comes with the caller's item (its own data: the caller's arrays
**          may move while workers run).
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

/* ---- a feed: chunks run while they are still being made ------------------ */

struct st_feed {
    pthread_mutex_t lock;
    pthread_cond_t more;         /* a chunk was published, or the end */
    void **items;                /* per published chunk, the producer's */
    size_t nitems, capitems;
    size_t next;                 /* next chunk to hand out */
    int closed;                  /* no more chunks will come */
    size_t failed_chunk;
    st_status failed;
    st_feed_task task;
    void *ctx;
    unsigned nthreads, started;
    pthread_t tid[ST_POOL_MAX_THREADS];
    struct feed_arg {
        st_feed *f;
        unsigned worker;
    } args[ST_POOL_MAX_THREADS];
};

/* Under the lock: record a failure, keeping the lowest chunk's. */
static void feed_failed(st_feed *f, size_t chunk, st_status rc)
{
    if (f->failed == ST_OK || chunk < f->failed_chunk) {
        f->failed = rc;
        f->failed_chunk = chunk;
    }
}

/* Run chunks until none is left: a worker (block = 1) waits for more
** until the feed is closed; the caller (block = 0) stops when none is
** published. */
static void feed_work(st_feed *f, unsigned worker, int block)
{
    pthread_mutex_lock(&f->lock);
    for (;;) {
        while (block && f->failed == ST_OK && f->next == f->nitems && !f->closed)
            pthread_cond_wait(&f->more, &f->lock);
        if (f->failed != ST_OK || f->next == f->nitems)
            break;
        size_t c = f->next++;
        void *item = f->items[c];
        pthread_mutex_unlock(&f->lock);
        st_status rc = f->task(f->ctx, worker, c, item);
        pthread_mutex_lock(&f->lock);
        if (rc != ST_OK) {
            feed_failed(f, c, rc);
            pthread_cond_broadcast(&f->more);
        }
    }
    pthread_mutex_unlock(&f->lock);
}

static void *feed_thread(void *arg)
{
    struct feed_arg *a = arg;
    feed_work(a->f, a->worker, 1);
    return NULL;
}

st_status st_feed_start(unsigned nthreads, st_feed_task task, void *ctx, st_feed **out)
{
    *out = NULL;
    st_feed *f = st_calloc(1, sizeof *f);
    if (!f)
        return ST_ERR_NOMEM;
    if (pthread_mutex_init(&f->lock, NULL) != 0) {
        st_free(f);
        return ST_ERR_NOMEM;
    }
    if (pthread_cond_init(&f->more, NULL) != 0) {
        pthread_mutex_destroy(&f->lock);
        st_free(f);
        return ST_ERR_NOMEM;
    }
    f->task = task;
    f->ctx = ctx;
    f->nthreads = nthreads < 1 ? 1 : nthreads > ST_POOL_MAX_THREADS ? ST_POOL_MAX_THREADS
                                                                     : nthreads;
    for (unsigned w = 1; w < f->nthreads; w++) {
        f->args[w] = (struct feed_arg){f, w};
        if (pthread_create(&f->tid[f->started], NULL, feed_thread, &f->args[w]) != 0)
            break;
        f->started++;
    }
    *out = f;
    return ST_OK;
}

st_status st_feed_publish(st_feed *f, void *item)
{
    pthread_mutex_lock(&f->lock);
    st_status rc = f->failed;
    if (rc == ST_OK && f->nitems == f->capitems) {
        size_t cap = f->capitems ? 2 * f->capitems : 64;
        void **a = st_realloc(f->items, cap * sizeof *a);
        if (a) {
            f->items = a;
            f->capitems = cap;
        } else {
            rc = ST_ERR_NOMEM;
        }
    }
    if (rc == ST_OK) {
        f->items[f->nitems++] = item;
        pthread_cond_signal(&f->more);
    }
    pthread_mutex_unlock(&f->lock);
    if (rc == ST_OK && f->started == 0) {   /* no worker: run it here, now */
        feed_work(f, 0, 0);
        pthread_mutex_lock(&f->lock);
        rc = f->failed;
        pthread_mutex_unlock(&f->lock);
    }
    return rc;
}

st_status st_feed_finish(st_feed *f, int cancel)
{
    if (!f)
        return ST_OK;
    pthread_mutex_lock(&f->lock);
    f->closed = 1;
    if (cancel && f->failed == ST_OK) {
        f->failed = ST_ERR_LIMIT;   /* stops the workers; not returned */
        f->failed_chunk = 0;
    }
    pthread_cond_broadcast(&f->more);
    pthread_mutex_unlock(&f->lock);
    if (!cancel)
        feed_work(f, 0, 0);   /* the caller helps with what is left */
    for (unsigned k = 0; k < f->started; k++)
        pthread_join(f->tid[k], NULL);
    st_status rc = cancel ? ST_OK : f->failed;
    pthread_cond_destroy(&f->more);
    pthread_mutex_destroy(&f->lock);
    st_free(f->items);
    st_free(f);
    return rc;
}
