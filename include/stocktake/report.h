/*
** stocktake/report.h -- the quality report of a run: report.json (a
** versioned schema, docs/report.md and docs/report.schema.json), one
** self-contained report.html (inline SVG map and charts, no network), and
** the terminal summary as text.
**
** Input:  st_report_input, which only borrows: the run's balance and
**         findings (pipeline.h), the audit (audit.h, may be absent), the
**         distributions of footprint area and storeys, and the files read
**         with their SHA-256.
** Output: text in an st_buf (st_report_json, st_report_html,
**         st_report_text), or files written under a temporary name and
**         renamed into place, so a failed run leaves no half report.
** Errors: ST_ERR_NOMEM, ST_ERR_LIMIT (a report larger than
**         ST_REPORT_MAX_BYTES), ST_ERR_IO with a diagnostic naming the file.
** The library never prints: the CLI prints the text summary.
*/
#ifndef STOCKTAKE_REPORT_H
#define STOCKTAKE_REPORT_H

#include <stdint.h>
#include "stocktake/audit.h"
#include "stocktake/core.h"
#include "stocktake/feature.h"
#include "stocktake/pipeline.h"

#define ST_REPORT_SCHEMA_VERSION 1
/* Hard cap on one rendered report file (256 MiB): many districts and a
** long unmapped list stay far below; beyond it ST_ERR_LIMIT. */
#define ST_REPORT_MAX_BYTES ((size_t)256 << 20)
/* Lists cut in the HTML page (report.json keeps every entry). */
#define ST_REPORT_HTML_MAX_CODES 30
#define ST_REPORT_HTML_MAX_UNMAPPED 150
#define ST_REPORT_HTML_MAX_LEARNED 150
#define ST_REPORT_HTML_MAX_DISTRICTS 5000   /* rows of the district table */

/* One file the run read, with its hash for reproduction and audit. */
typedef struct st_report_file {
    const char *role;      /* "input", "rules", "districts", "reference"; borrowed */
    const char *path;      /* borrowed */
    char sha256[65];       /* filled by st_report_hash_files */
    uint64_t bytes;
} st_report_file;

/*
** Hash every file (a shapefile's .shx, .dbf, .prj and .cpg siblings are
** added by the caller as their own entries; see st_report_file_siblings).
** On failure a diagnostic names the file and ST_ERR_IO is returned.
*/
st_status st_report_hash_files(st_report_file *files, size_t n, st_diags *diags) ST_MUST_CHECK;

/*
** The files that belong to a layer at 'path' (borrowed): the file itself
** (FILE for a spec "FILE:LAYER" that is not itself a file), and for a .shp
** its existing .shx/.dbf/.prj/.cpg siblings. Returns owned
** array of owned paths in *paths (*n entries); free each and the array with
** st_free. ST_ERR_NOMEM only.
*/
st_status st_report_file_siblings(const char *path, char ***paths, size_t *n) ST_MUST_CHECK;

/* ---- distributions of the kept buildings -------------------------------- */

/* Footprint area bins on a 1-2-5 log scale: [0,5) [5,10) [10,20) [20,50)
** ... [5000,10000) [10000,inf) square metres. */
#define ST_REPORT_AREA_BINS 12
/* Storey bins: 1, 2, ... 10, 11-15, 16-20, 21-30, 31 and more. */
#define ST_REPORT_STOREY_BINS 14

typedef struct st_report_dist {
    uint64_t buildings;
    uint64_t area[ST_REPORT_AREA_BINS];
    int has_storeys;                               /* the schema has storeys */
    uint64_t storeys_observed[ST_REPORT_STOREY_BINS]; /* source or derived */
    uint64_t storeys_assumed[ST_REPORT_STOREY_BINS];  /* default or drawn */
    uint64_t storeys_unknown;
} st_report_dist;

/* Lower and upper bound of area bin i (upper INFINITY for the last). */
void st_report_area_bin(int i, double *lo, double *hi);
/* Lowest and highest storey count of storey bin i (hi -1: no upper bound). */
void st_report_storey_bin(int i, int *lo, int *hi);
/* Count one kept building; 'storeys_field' is the schema index of storeys
** or -1. 'f' borrowed. */
void st_report_dist_add(st_report_dist *d, const st_feature *f, int32_t storeys_field);

/* ---- what a report shows ----------------------------------------------- */

typedef struct st_report_input {
    const st_run_result *run;        /* balance per layer, findings, gate */
    const st_audit *audit;           /* districts, fields, gates; may be NULL */
    const st_report_dist *dist;      /* may be NULL */
    const st_report_file *files;     /* hashed inputs and rule files */
    size_t nfiles;
    const char *command_line;        /* may be NULL */
    const char *started, *finished;  /* ISO 8601 UTC, may be NULL */
    int has_seed;
    uint64_t seed;
    const char *const *outputs;      /* every file the run writes */
    size_t noutputs;
} st_report_input;

/* Render into 'out' (appends; borrowed). ST_ERR_NOMEM or ST_ERR_LIMIT. */
st_status st_report_json(const st_report_input *in, st_buf *out) ST_MUST_CHECK;
st_status st_report_html(const st_report_input *in, st_buf *out) ST_MUST_CHECK;
/* The terminal summary: balance, top findings, districts, gate, outputs. */
st_status st_report_text(const st_report_input *in, st_buf *out) ST_MUST_CHECK;

/* Render and write one file at 'path' (temporary name, then rename). */
st_status st_report_write_json(const st_report_input *in, const char *path,
                               st_diags *diags) ST_MUST_CHECK;
st_status st_report_write_html(const st_report_input *in, const char *path,
                               st_diags *diags) ST_MUST_CHECK;

/*
** Two-step writing for a run that must put all its outputs in place
** together: st_report_prepare renders report.json and report.html and
** writes them under temporary names in 'dir' (created when missing, one
** level); st_report_commit renames them into place. Returns owned
** st_report_pending in *out; free with st_report_pending_free, which
** removes uncommitted files (and 'dir' when this call created it).
*/
typedef struct st_report_pending st_report_pending;

st_status st_report_prepare(const st_report_input *in, const char *dir,
                            st_diags *diags, st_report_pending **out) ST_MUST_CHECK;
st_status st_report_commit(st_report_pending *p, st_diags *diags) ST_MUST_CHECK;
void st_report_pending_free(st_report_pending *p);
/* The final paths "DIR/report.json" and "DIR/report.html" (borrowed). */
const char *st_report_pending_path(const st_report_pending *p, int html);

#endif
