/*
** stocktake/pipeline.h -- one whole run: read every input, check and repair
** footprints, compare neighbours, (place, apply rules, audit), write the
** inventory. The CLI's `run` fills st_run_options and prints the result.
**
** Nothing lost: every feature read ends up exactly once in `buildings` or
** `set_aside`; st_run_result gives the balance per input layer.
*/
#ifndef STOCKTAKE_PIPELINE_H
#define STOCKTAKE_PIPELINE_H

#include <signal.h>
#include <stdint.h>
#include "stocktake/core.h"
#include "stocktake/audit.h"
#include "stocktake/defaults.h"
#include "stocktake/place.h"
#include "stocktake/finding.h"

typedef enum { ST_FAIL_ON_NONE = 0, ST_FAIL_ON_WARNING, ST_FAIL_ON_ERROR } st_fail_on;

typedef struct st_run_options {
    const char *const *inputs;   /* layer specs ("a.shp", "b.gpkg:layer") */
    size_t ninputs;
    const char *const *rules;    /* rule files, loaded as one set (may be 0) */
    size_t nrules;
    const char *output;          /* OUT.gpkg | .geojson | .geojsonl | .csv | .shp */
    const char *crs_override;    /* --crs for layers without a CRS, or NULL */
    st_fail_on fail_on;          /* findings at or above this fail the gate */
    const char *command_line;    /* recorded in run_info */
    const char *districts;       /* --districts layer, or NULL (no placement) */
    const char *district_key;    /* --district-key, or NULL (place.h) */
    const char *region_key;      /* --region-key, or NULL */
    const char *reference;       /* --reference CSV of expected counts, or NULL */
    st_fill_mode fill;           /* --fill most-likely | draw */
    uint64_t seed;               /* --seed for the draw */
    unsigned threads;            /* -j: worker threads of the per-feature
                                    stages; 0 = the number of online cores.
                                    The outputs are the same for any value. */
    const char *report_dir;      /* --report DIR: report.json and report.html
                                    written there (report.h), or NULL */
    /* Progress: called now and then from the calling thread; may be NULL. */
    void (*progress)(void *ud, const char *stage, long long done, long long total);
    void *progress_ud;
    /* Stop request, or NULL: once the caller sets *stop to nonzero (a
    ** signal handler, say), the run stops at the next stage, chunk of
    ** reading or output, with ST_ERR_STOPPED and nothing written (no
    ** output, no report, no temporary file). Once the outputs are in
    ** place a request changes nothing. */
    const volatile sig_atomic_t *stop;
    /* Memory limit in bytes (0: st_run_default_max_memory()). The run
    ** estimates its need from the input sizes before reading and from
    ** each feature while reading, and stops with ST_ERR_LIMIT before it
    ** passes the limit (pipeline/guard.c, docs/reliability.md). */
    uint64_t max_memory;
    /* A part of a job split by windows (docs/scale.md): --tile "Z/X/Y" or
    ** --bbox "W,S,E,N" (at most one; both NULL for a whole run). The run
    ** then reads only the features within halo_m metres of the window
    ** (0: ST_RUN_DEFAULT_HALO_M), decides duplicates and overlaps as a
    ** whole run would (widening the halo itself when a decision reaches
    ** beyond it), and writes a part (part.h) to 'output' for
    ** st_run_merge; no defaults, audit or report. */
    const char *tile;
    const char *bbox;
    double halo_m;
    /* A part only: the layer facts `stocktake tiles --facts` wrote for
    ** these inputs (facts.h), or NULL. Every input is checked against
    ** them before it is read; a GeoPackage input with dense fids and an
    ** R-tree is read only within reach of the window. */
    const char *facts;
} st_run_options;

/* The halo a part reads around its window unless told otherwise: wider
** than most buildings (common practice, no source: factory halls, malls
** and hangars reach 300-500 m), because a halo found too narrow costs a
** second read of every input, while a wide one costs only the checks of
** the footprints in it (docs/scale.md, docs/performance.md "Windows"). */
#define ST_RUN_DEFAULT_HALO_M 500.0

typedef struct st_run_layer {
    char *name;                  /* unique layer name in this run */
    char *path;
    char *format;
    char *crs;
    uint64_t read, kept, repaired, duplicate, rejected;
} st_run_layer;

typedef struct st_run_code_count {
    const char *code;            /* static */
    st_severity severity;
    uint64_t count;
} st_run_code_count;

typedef struct st_run_unmapped {
    char *field;                 /* schema field, owned */
    char *value;                 /* source value no map line matched, owned */
    uint64_t count;
} st_run_unmapped;

/* Time and memory of one stage of a run (all the run's threads together). */
#define ST_RUN_MAX_TIMINGS 16
typedef struct st_run_timing {
    const char *stage;           /* static: "read", "footprint", ... "total" */
    double wall_s;               /* elapsed seconds */
    double cpu_s;                /* CPU seconds, user + system, all threads */
    uint64_t items;              /* features the stage went through */
    long peak_rss_kb;            /* the process's peak resident set so far,
                                    at the stage's end (0: unknown) */
} st_run_timing;

typedef struct st_run_result {
    st_run_layer *layers;
    size_t nlayers;
    st_run_code_count *codes;    /* sorted by count, most frequent first */
    size_t ncodes;
    uint64_t findings[3];        /* by severity: note, warning, error */
    int gate_failed;             /* 1: exit code 1 */
    char *gate_reason;           /* owned, why the gate failed, or NULL */
    st_run_unmapped *unmapped;   /* most frequent first */
    size_t nunmapped;
    char **outputs;              /* files written */
    size_t noutputs;
    st_run_timing timings[ST_RUN_MAX_TIMINGS];  /* stages in run order, then
                                    "total"; for `run --timings` and bench */
    size_t ntimings;
    st_audit *audit;             /* owned: the completeness audit (audit.h) */
    st_districts *districts;     /* owned, or NULL: the district layer the
                                    audit's polygons point into */
    char *summary;               /* owned: the terminal summary (report.h) for
                                    the CLI to print, or NULL */
    struct st_strtab *strings;   /* owned, or NULL: after a merge, the text
                                    the codes above point into */
} st_run_result;

/*
** Run the whole job. 'opt' borrowed. On success *out is owned (free with
** st_run_result_free) and every output is in place. On failure *out is
** NULL, diagnostics say why, and nothing was written.
*/
st_status st_run_execute(const st_run_options *opt, st_diags *diags,
                         st_run_result **out) ST_MUST_CHECK;
void st_run_result_free(st_run_result *r);

/*
** Finish a job split into parts: opt->inputs are the parts (part.h) that
** `run --tile/--bbox` wrote; the other options (rules, districts,
** reference, fill, seed, gate, output, report) as for the run, and they
** must be the ones the parts were made with (each part records their
** fingerprint). The parts must together hold every feature of every input
** layer exactly once. Then defaults, audit, gate, inventory and report
** as in st_run_execute, with the same result as a single run.
*/
st_status st_run_merge(const st_run_options *opt, st_diags *diags,
                       st_run_result **out) ST_MUST_CHECK;

/* The default memory limit: 75 % of physical memory or 8 GiB, whichever is
** less. */
uint64_t st_run_default_max_memory(void);

/* Estimated bytes one feature (borrowed) adds to a run's peak memory,
** stages included (the calibration is in pipeline/guard.c). */
struct st_feature;
uint64_t st_run_feature_estimate(const struct st_feature *f);

#endif
