/*
** stocktake/neighbours.h -- the neighbour stage: footprints compared with
** the footprints around them, across all input layers together.
**
** What it decides (docs/neighbours.md has the reasons, docs/findings.md
** the codes):
**   exact duplicates   same geometry whatever the start vertex, ring
**                      direction, order of holes and order of parts: all
**                      members but one are set aside (ST_STATUS_DUPLICATE);
**   near-duplicates    intersection over union >= near_iou: set aside the
**                      same way (one building kept, a finding on it);
**   overlaps           intersection >= overlap_share of the smaller footprint
**                      and >= overlap_min_m2: a finding on BOTH buildings;
**   containment        intersection >= contained_share of the smaller one:
**                      its own finding on both buildings.
** The keeper of a duplicate group is the member with the most filled
** source attributes (st_feature_filled); ties go to the first read (lowest
** layer, then lowest index within the layer).
**
** Which features take part: status ST_STATUS_OK or ST_STATUS_REPAIRED with
** a non-empty polygonal geometry (polygon, multipolygon, or the polygonal
** parts of a collection) in lon/lat. Everything else (rejected, already
** set aside, points, lines, empty) is left alone.
**
** Determinism: every decision follows the features' (layer, index) order,
** never their order in the array nor the spatial index's internals, so the
** same input gives the same keepers and findings.
**
** The work is split in three calls so a later multi-threaded run can share
** the middle one out (each thread with its own st_geos):
**
**     st_neighbours_begin    one thread: exact duplicates, spatial index
**     st_neighbours_scan     any number of threads, disjoint ranges of
**                            [0, st_neighbours_count()): pair geometry
**     st_neighbours_finish   one thread: near-duplicate keepers, findings
**
** st_neighbours_run() does the three in one thread. The index is GEOS's
** STRtree: begin() forces its build, after which scans only read it.
*/
#ifndef STOCKTAKE_NEIGHBOURS_H
#define STOCKTAKE_NEIGHBOURS_H

#include <stddef.h>
#include <stdint.h>

#include "stocktake/core.h"
#include "stocktake/feature.h"
#include "stocktake/finding.h"
#include "stocktake/geomx.h"

/* Finding codes of this stage (static strings; see docs/findings.md). */
#define ST_CODE_DUP_EXACT         "dup.exact"
#define ST_CODE_DUP_NEAR          "dup.near"
#define ST_CODE_OVERLAP_PARTIAL   "overlap.partial"
#define ST_CODE_OVERLAP_CONTAINED "overlap.contained"

/*
** Thresholds and severities. st_neighbours_config_init() sets the
** defaults documented (with reasons) in docs/neighbours.md.
*/
typedef struct st_neighbours_config {
    double near_iou;          /* IoU at or above: near-duplicate (0.9) */
    double overlap_share;     /* share of the smaller footprint at or above:
                                 overlap (0.25) */
    double contained_share;   /* share at or above: contained (0.99) */
    double overlap_min_m2;    /* intersections below this many m² are never
                                 overlaps: shared walls, slivers (1.0) */
    st_severity exact_severity;      /* on the keeper of an exact group (note) */
    st_severity near_severity;       /* on the keeper of a near group (warning) */
    st_severity overlap_severity;    /* on both of a partial overlap (warning) */
    st_severity contained_severity;  /* on both of a containment (warning) */
    uint32_t max_candidates;  /* footprints whose envelope meets more than
                                 this many others are not compared (a
                                 warning says so) (100000) */
} st_neighbours_config;

/* Fill 'cfg' with the documented defaults. */
void st_neighbours_config_init(st_neighbours_config *cfg);

/*
** Check that the thresholds are in range (shares and IoU in (0, 1],
** contained_share >= overlap_share, overlap_min_m2 >= 0, max_candidates
** >= 1). Returns ST_OK or ST_ERR_USAGE with one diagnostic per problem.
*/
st_status st_neighbours_config_check(const st_neighbours_config *cfg,
                                     st_diags *diags) ST_MUST_CHECK;

/* The stage's state between begin() and finish(); opaque. */
typedef struct st_neighbours st_neighbours;

/* The pairs one scan found; opaque, owned by the caller of scan(). */
typedef struct st_neighbours_pairs st_neighbours_pairs;

/*
** Describes the input of one run. All pointers are borrowed and must stay
** valid (and the features unmoved) until st_neighbours_free().
**   features     the run's features from all layers, in any order; begin()
**                and finish() change status, duplicate_of and reason of
**                the ones set aside, nothing else
**   layer_names  optional (NULL): names of the input layers, indexed by
**                st_feature.layer, used in diagnostics only
*/
typedef struct st_neighbours_input {
    st_feature **features;
    size_t count;
    const char *const *layer_names;
    uint32_t nlayers;
} st_neighbours_input;

/*
** Begin the stage: choose the features that take part, set aside exact
** duplicates (adding a dup.exact finding on each keeper to 'findings') and
** index the envelopes of the rest. 'cfg' is copied; 'in' and 'gx' are
** borrowed until st_neighbours_free() ('gx' owns the spatial index, so
** only the thread that called begin() may call finish() and free()).
** On success *out is owned; free with st_neighbours_free(). On failure
** *out is NULL, the status is returned (ST_ERR_NOMEM, ST_ERR_GEOS,
** ST_ERR_LIMIT beyond UINT32_MAX - 1 features) with a diagnostic, and some
** duplicates may already be marked: the run must stop.
*/
st_status st_neighbours_begin(const st_neighbours_config *cfg,
                              const st_neighbours_input *in, st_geos *gx,
                              st_findings *findings, st_diags *diags,
                              st_neighbours **out) ST_MUST_CHECK;

/* Number of indexed footprints: scans cover [0, count). */
size_t st_neighbours_count(const st_neighbours *nb);

/*
** Compare footprints [begin, end) of the index with the footprints after
** them whose envelopes meet theirs, using 'gx' (borrowed; one per thread).
** Reads 'nb' and the features only, so scans of disjoint ranges may run at
** the same time. On success *out owns the pairs found (free with
** st_neighbours_pairs_free(), or hand them to finish()). A pair GEOS
** cannot compute, or a footprint beyond max_candidates, is skipped with a
** warning in 'diags' (borrowed, one per thread). Errors: ST_ERR_NOMEM,
** ST_ERR_GEOS (the index failed), ST_ERR_USAGE (bad range); *out is NULL.
*/
st_status st_neighbours_scan(const st_neighbours *nb, st_geos *gx,
                             size_t begin, size_t end, st_diags *diags,
                             st_neighbours_pairs **out) ST_MUST_CHECK;

void st_neighbours_pairs_free(st_neighbours_pairs *pairs);

/*
** Finish the stage: from the pairs of all scans (borrowed; any order, but
** together covering each footprint once) set aside near-duplicates and add
** dup.near, overlap.partial and overlap.contained findings in a fixed
** order. Returns ST_OK or ST_ERR_NOMEM (with a diagnostic; features may be
** partly marked: the run must stop).
*/
st_status st_neighbours_finish(st_neighbours *nb,
                               st_neighbours_pairs *const *parts, size_t nparts,
                               st_findings *findings,
                               st_diags *diags) ST_MUST_CHECK;

/* One pair a scan found, for callers that need the neighbour graph (a
** tile's halo check, docs/scale.md): positions in in.features. */
typedef struct st_neighbours_link {
    uint32_t a, b;               /* a first in (layer, index) order */
    uint32_t near;               /* 1: near-duplicate pair, 0: overlap or
                                    containment candidate that passed */
} st_neighbours_link;

/* Every pair of the scans' parts (borrowed), any kind: *out returns owned
** array (free with st_free) of *n links, NULL when there are none.
** ST_ERR_NOMEM only. */
st_status st_neighbours_links(const st_neighbours *nb,
                              st_neighbours_pairs *const *parts, size_t nparts,
                              st_neighbours_link **out, size_t *n) ST_MUST_CHECK;

/* Free the state and its spatial index (NULL is a no-op). */
void st_neighbours_free(st_neighbours *nb);

/*
** The whole stage in the calling thread: begin, one scan over everything,
** finish, free. Arguments and errors as for those calls.
*/
st_status st_neighbours_run(const st_neighbours_config *cfg,
                            const st_neighbours_input *in, st_geos *gx,
                            st_findings *findings,
                            st_diags *diags) ST_MUST_CHECK;

#endif
