/*
** pipeline/pipelineInt.h -- private to the pipeline module.
*/
#ifndef STOCKTAKE_PIPELINE_INT_H
#define STOCKTAKE_PIPELINE_INT_H

#include "stocktake/facts.h"
#include "stocktake/footprint.h"
#include "stocktake/io.h"
#include "stocktake/neighbours.h"
#include "stocktake/rules.h"

#include "stocktake/audit.h"
#include "stocktake/defaults.h"
#include "stocktake/finding.h"
#include "stocktake/geomx.h"
#include "stocktake/pipeline.h"
#include "stocktake/place.h"
#include "stocktake/report.h"
#include "stocktake/strtab.h"
#include "stocktake/tile.h"
#include "guardInt.h"

/* ---- the state of one run (pipeline.c owns it; each stage fills a part) -- */


typedef struct run_state {
    const st_run_options *opt;
    st_diags *diags;
    st_feature **features;       /* every feature read, in read order */
    size_t nfeatures, capfeatures;
    st_fields *fields;           /* per layer, copied from its reader */
    size_t nfields;              /* entries of 'fields' */
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
    uint64_t nread;              /* features read so far, all layers: the
                                    last bid given */
    st_footprint_extent *extents;/* per layer, from every feature read */
    /* A part (run --tile / --bbox): NULL for a whole run. */
    const st_window *window;
    double halo_m;               /* the halo read around the window */
    double read_box[4];          /* the window grown by the halo */
    uint8_t *shared;             /* per feature after the tile cut: 1 when
                                    every part holds it (tile.h) */
    /* merge: the parts, and the strings (codes, rule lines) their
    ** features and findings point into */
    st_strtab *strings;
    /* the neighbour pairs, kept for a part's halo check */
    st_neighbours_link *links;
    size_t nlinks;
    /* the footprint checks running while the read stage reads
    ** (run_geometry.c); NULL outside those two stages */
    struct fp_overlap *fp;
    /* a part's layer facts (--facts), or NULL */
    struct st_facts *facts;
} run_state;


/* The features split into chunks of at most ST_POOL_CHUNK, never across a
** layer boundary (the footprint check depends on the layer's extent). */
typedef struct run_chunk {
    size_t first, end;
    uint32_t layer;
} run_chunk;

/* ---- shared by the stages (run_chunks.c) ---------------------------------- */

void st_run_progress(run_state *s, const char *stage, long long done, long long total);
/* ST_ERR_STOPPED (with one diagnostic) once the caller asked the run to
** stop (st_run_options.stop), else ST_OK. */
st_status st_run_check_stop(run_state *s) ST_MUST_CHECK;
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

/* ---- the state (pipeline.c) ---------------------------------------------- */

/* Set up the state of a run or a merge ('opt' borrowed). */
st_status st_run_state_init(run_state *s, const st_run_options *opt, st_diags *diags);
/* Free the state; on rc == ST_OK hand the result to *out, else free it.
** Returns rc. */
st_status st_run_state_finish(run_state *s, st_status rc, st_run_result **out);
/* The rule set (and the geometry settings it carries), then districts,
** reference counts and defaults tables: before any data. */
st_status st_run_load_rules(run_state *s);
st_status st_run_load_places(run_state *s);

/* ---- the stages, in run order (each: ST_OK or the failure that stops) ---- */

st_status st_stage_read(run_state *s);          /* run_read.c */
/* The footprint checks overlap the read (run_geometry.c): the read stage
** starts them, hands over each chunk of features it has pushed (layer_end:
** the layer's last, partial chunk too) and cancels them when it fails;
** the footprint stage finishes them. */
st_status st_run_footprints_begin(run_state *s);
st_status st_run_footprints_feed(run_state *s, int layer_end);
void st_run_footprints_cancel(run_state *s);
st_status st_stage_footprints(run_state *s);    /* run_geometry.c */
st_status st_stage_neighbours(run_state *s);
st_status st_stage_place(run_state *s);         /* run_attrs.c */
st_status st_stage_rules(run_state *s);
/* Read the defaults tables before any data (a bad table stops early). */
st_status st_run_prepare_defaults(run_state *s);
st_status st_stage_defaults(run_state *s);
/* Copy the counts of 'u' (borrowed) into the result, most frequent first. */
st_status st_run_keep_unmapped(run_state *s, const st_unmapped *u);
st_status st_stage_findings(run_state *s);      /* run_tally.c */
st_status st_stage_audit(run_state *s);
st_status st_stage_gate(run_state *s);
st_status st_stage_summary(run_state *s);       /* run_write.c */
st_status st_stage_write(run_state *s);

/* ---- parts (run_tile.c) --------------------------------------------------- */

/* Decide the features the window owns and check the halo held every
** decision about them: *need_m > 0 is the reach (metres beyond the window)
** a halo must have for it, and nothing is changed; otherwise only the
** owned and shared features and their findings are kept. Frees s->links. */
st_status st_run_tile_cut(run_state *s, double *need_m);
/* Write the part (part.h) to opt->output. */
st_status st_stage_write_part(run_state *s);

/* ---- a part's layer facts (run_facts.c) ----------------------------------- */

struct st_facts_layer;
struct st_read_window;
/* Load opt->facts (when given) into s->facts and match it to the inputs. */
st_status st_run_facts_load(run_state *s);
/* Input l, opened as r (borrowed), is the file the facts describe, unchanged. */
st_status st_run_facts_check_input(run_state *s, size_t l, const st_reader *r);
/* An ST_ERR_FORMAT diagnostic: input l does not match the facts because ... */
st_status st_run_facts_mismatch(run_state *s, size_t l, const char *fmt, ...) ST_PRINTF(3, 4);
/* 1 when layer facts 'given' (or NULL) let the layer be read through the
** window (then *w is filled, borrowing from 'given'), else 0. */
int st_run_facts_window(const run_state *s, const struct st_facts_layer *given,
                        struct st_read_window *w);
/* The SHA-256 (hex) of what the read learnt of every layer (count, field
** types, extent): a part records it and merge requires every part's to
** agree, whether a part read its layers whole or took a facts file. */
void st_run_layer_facts_digest(const run_state *s, char hex[65]);

/* merge: read the parts (opt->inputs) back as the run's features,
** findings, layers and unmapped counts, checking that they belong
** together and hold every feature once (merge.c). */
st_status st_stage_read_parts(run_state *s);

/* The context of a run a part records and merge compares: the rule,
** table, district and reference files with their SHA-256, the keys, fill,
** seed and --crs. */
#define RUN_CONTEXT_MAX 4
typedef struct run_context {
    const char *keys[RUN_CONTEXT_MAX];   /* static */
    char *values[RUN_CONTEXT_MAX];       /* owned */
    size_t n;
} run_context;
st_status st_run_context_make(run_state *s, run_context *c);
void st_run_context_free(run_context *c);

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

/*
** A feed: chunks run on the pool while the caller is still making them.
** task(ctx, worker, c, item) runs for chunk c (numbered in publish order)
** with the item published for it (borrowed; the task may write into it;
** the caller reads it again only after st_feed_finish). Workers 1 ..
** nthreads-1 are threads started by st_feed_start; worker 0 is the
** calling thread: with no other worker it runs each chunk inside
** st_feed_publish, else it helps in st_feed_finish.
*/
typedef struct st_feed st_feed;
typedef st_status (*st_feed_task)(void *ctx, unsigned worker, size_t chunk, void *item);
/* Owned feed in *out (free with st_feed_finish); ST_ERR_NOMEM. */
st_status st_feed_start(unsigned nthreads, st_feed_task task, void *ctx,
                        st_feed **out) ST_MUST_CHECK;
/* Hand out one more chunk. Returns ST_OK, or the failure of the lowest
** failed chunk so far (then 'item' is not taken: the producer stops). */
st_status st_feed_publish(st_feed *f, void *item) ST_MUST_CHECK;
/* No more chunks: run what is left (the calling thread helps), join the
** workers, free f. Returns ST_OK or the status of the lowest failed chunk
** (no chunk starts after a failure). With 'cancel', chunks not yet started
** never run and ST_OK is returned. f NULL: ST_OK. */
st_status st_feed_finish(st_feed *f, int cancel);

#endif
