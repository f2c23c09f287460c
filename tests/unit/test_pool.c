/*
** tests/unit/test_pool.c -- the pipeline's worker pool (pipeline/pool.c):
** every chunk runs exactly once for any number of threads, the workers'
** numbers stay below the thread count, a failure is reported as the
** status of the lowest failed chunk and stops new chunks, and -j 0 means
** the online cores (sysconf, as nproc counts them). The feed (chunks run
** while they are still being published): every chunk once, in the
** calling thread at publish time with one thread; a failure reaches the
** producer and the finish; a cancel runs nothing more.
*/
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <cmocka.h>

#include <pthread.h>
#include <string.h>
#include <unistd.h>

#include "stocktake/core.h"
#include "pipeline/pipelineInt.h"

#define NCHUNKS 1000

typedef struct job {
    pthread_mutex_t lock;
    int runs[NCHUNKS];
    unsigned max_worker;
    size_t fail_from;          /* chunks >= this fail (NCHUNKS: none) */
    size_t ran_after_failure;  /* chunks started above the first failure */
} job;

static st_status task(void *ctx, unsigned worker, size_t c)
{
    job *j = ctx;
    pthread_mutex_lock(&j->lock);
    j->runs[c]++;
    if (worker > j->max_worker)
        j->max_worker = worker;
    pthread_mutex_unlock(&j->lock);
    if (c >= j->fail_from)
        return c % 2 ? ST_ERR_LIMIT : ST_ERR_NOMEM;
    return ST_OK;
}

static void run(job *j, unsigned threads, size_t fail_from)
{
    memset(j->runs, 0, sizeof j->runs);
    j->max_worker = 0;
    j->fail_from = fail_from;
    pthread_mutex_init(&j->lock, NULL);
    st_status rc = st_pool_run(threads, NCHUNKS, task, j);
    pthread_mutex_destroy(&j->lock);
    if (fail_from >= NCHUNKS)
        assert_int_equal(rc, ST_OK);
    else
        /* chunk fail_from (even: NOMEM) is the lowest that can fail */
        assert_int_equal(rc, ST_ERR_NOMEM);
}

static void test_every_chunk_once(void **state)
{
    (void)state;
    job j;
    for (unsigned t = 1; t <= 8; t++) {
        run(&j, t, NCHUNKS);
        for (size_t c = 0; c < NCHUNKS; c++)
            assert_int_equal(j.runs[c], 1);
        assert_true(j.max_worker < t);
    }
}

static void test_failure_stops_and_reports_lowest(void **state)
{
    (void)state;
    job j;
    for (unsigned t = 1; t <= 4; t++) {
        run(&j, t, 500);
        for (size_t c = 0; c < 500; c++)
            assert_int_equal(j.runs[c], 1);     /* handed out in order */
        size_t after = 0;
        for (size_t c = 500; c < NCHUNKS; c++)
            after += (size_t)j.runs[c];
        /* one thread stops at the failed chunk itself; with more, the
        ** chunks other workers took before the failure was seen run too */
        if (t == 1)
            assert_int_equal(after, 1);
        else
            assert_true(after >= 1);
    }
}

static void test_thread_counts(void **state)
{
    (void)state;
    long cores = sysconf(_SC_NPROCESSORS_ONLN);
    assert_int_equal(st_pool_threads(0), cores > 0 ? (unsigned)cores : 1u);
    assert_int_equal(st_pool_threads(3), 3);
    assert_int_equal(st_pool_threads(1000), ST_POOL_MAX_THREADS);
    job j;
    memset(&j, 0, sizeof j);
    pthread_mutex_init(&j.lock, NULL);
    assert_int_equal(st_pool_run(4, 0, task, &j), ST_OK);   /* nothing to do */
    pthread_mutex_destroy(&j.lock);
}

/* ---- the feed: chunks published one by one while workers run ---------- */

typedef struct feed_item {
    size_t chunk;              /* the number the task was given */
    int runs;
    unsigned worker;
} feed_item;

typedef struct feed_job {
    size_t fail_at;            /* this chunk fails (NCHUNKS: none) */
    unsigned threads;
} feed_job;

static st_status feed_task(void *ctx, unsigned worker, size_t c, void *item)
{
    feed_job *j = ctx;
    feed_item *it = item;
    it->chunk = c;
    it->runs++;
    it->worker = worker;
    assert_true(worker < j->threads);
    return c == j->fail_at ? ST_ERR_NOMEM : ST_OK;
}

static void test_feed_every_chunk_once(void **state)
{
    (void)state;
    static feed_item items[NCHUNKS];
    for (unsigned t = 1; t <= 6; t++) {
        memset(items, 0, sizeof items);
        feed_job j = {NCHUNKS, t};
        st_feed *f = NULL;
        assert_int_equal(st_feed_start(t, feed_task, &j, &f), ST_OK);
        for (size_t c = 0; c < NCHUNKS; c++) {
            assert_int_equal(st_feed_publish(f, &items[c]), ST_OK);
            if (t == 1)   /* no worker: run at once, in this thread */
                assert_int_equal(items[c].runs, 1);
            if (c % 100 == 0)
                usleep(100);   /* let the workers catch up and wait */
        }
        assert_int_equal(st_feed_finish(f, 0), ST_OK);
        for (size_t c = 0; c < NCHUNKS; c++) {
            assert_int_equal(items[c].runs, 1);
            assert_int_equal(items[c].chunk, c);
        }
    }
}

static void test_feed_failure_and_cancel(void **state)
{
    (void)state;
    static feed_item items[NCHUNKS];
    for (unsigned t = 1; t <= 4; t++) {
        memset(items, 0, sizeof items);
        feed_job j = {300, t};
        st_feed *f = NULL;
        assert_int_equal(st_feed_start(t, feed_task, &j, &f), ST_OK);
        size_t c = 0;
        st_status rc = ST_OK;
        for (; c < NCHUNKS && rc == ST_OK; c++)
            rc = st_feed_publish(f, &items[c]);
        /* the producer hears of the failure (at once with one thread) */
        if (t == 1)
            assert_int_equal(c, 301);
        assert_int_equal(st_feed_finish(f, 0), ST_ERR_NOMEM);
        for (size_t k = 0; k <= 300; k++)
            assert_int_equal(items[k].runs, 1);
    }
    /* cancel: what is not started never runs; nothing is reported */
    memset(items, 0, sizeof items);
    feed_job j = {NCHUNKS, 1};
    st_feed *f = NULL;
    assert_int_equal(st_feed_start(1, feed_task, &j, &f), ST_OK);
    assert_int_equal(st_feed_publish(f, &items[0]), ST_OK);
    assert_int_equal(st_feed_finish(f, 1), ST_OK);
    assert_int_equal(items[0].runs, 1);
    assert_int_equal(st_feed_finish(NULL, 0), ST_OK);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_every_chunk_once),
        cmocka_unit_test(test_failure_stops_and_reports_lowest),
        cmocka_unit_test(test_thread_counts),
        cmocka_unit_test(test_feed_every_chunk_once),
        cmocka_unit_test(test_feed_failure_and_cancel),
    };
    return cmocka_run_group_tests_name("pool", tests, NULL, NULL);
}
