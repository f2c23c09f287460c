/*
** stocktake/place.h -- the district layer and the placement of buildings in
** it: each kept building goes to the district that covers its point on
** surface; buildings outside every district get district -1 ("none").
**
** Input:   any layer the readers open (districts polygons with a key field
**          and, optionally, a parent-region field), reprojected to lon/lat
**          by the reader; features after the geometry stages.
** Output:  an st_districts set (read-only once loaded, shareable between
**          threads: it holds plain st_geom polygons, no GEOS objects),
**          f->district for every feature, `place.outside` findings.
** Errors:  an unreadable layer, a missing key field, a district without a
**          key or with a polygon GEOS cannot build: ST_ERR_* and one
**          diagnostic naming the file and feature. Invalid polygons are
**          not errors: they are repaired with GEOSMakeValid and each repair
**          is a warning diagnostic (and counted).
** Limits:  ST_PLACE_MAX_DISTRICTS features, ST_PLACE_MAX_KEY bytes a key.
**
** The border rule: a point that lies on the boundary shared by several
** districts is covered by all of them (GEOS `covers`); it goes to the one
** with the lowest district index, i.e. the one whose key was read first.
** So a building is placed exactly once and the result does not depend on
** the order of the buildings, the index or the number of threads.
*/
#ifndef STOCKTAKE_PLACE_H
#define STOCKTAKE_PLACE_H

#include <stddef.h>
#include <stdint.h>

#include "stocktake/core.h"
#include "stocktake/feature.h"
#include "stocktake/finding.h"
#include "stocktake/geomx.h"

#define ST_PLACE_MAX_DISTRICTS 1000000u   /* features of a district layer */
#define ST_PLACE_MAX_KEY 1024u            /* bytes of a district or region key */
#define ST_PLACE_MAX_THREADS 64

/* The key of the bucket of buildings outside every district (reserved:
** a district layer may not use it as a key). */
#define ST_PLACE_NONE "none"

/* Finding code: a kept building whose point on surface no district covers. */
#define ST_FINDING_PLACE_OUTSIDE "place.outside"

typedef struct st_district {
    char *key;              /* owned, unique in the set */
    char *region;           /* owned parent region key, NULL when none */
    st_geom geom;           /* lon/lat polygon or multipolygon, repaired where
                               GEOS found it invalid; may be empty */
    uint64_t feature;       /* index of its first feature in the layer */
    uint32_t nfeatures;     /* features merged into it (same key) */
    char *repair;           /* owned: why it was repaired (GEOS's reason and
                               place), NULL when it was valid */
} st_district;

typedef struct st_districts st_districts;

typedef struct st_districts_options {
    const char *path;        /* layer spec ("wards.geojson", "a.gpkg:layer") */
    const char *key;         /* key field; NULL: the first field that is
                                filled on every feature with distinct values */
    const char *region_key;  /* parent-region field, or NULL */
    const char *crs_override;/* "EPSG:n" when the layer states no CRS, or NULL */
} st_districts_options;

/*
** Read the district layer named by opt->path (opt borrowed). Features with
** the same key become one district (their polygons are its parts; a
** warning says so). On success *out is owned (free with
** st_districts_free). On failure *out is NULL and a diagnostic says why:
** ST_ERR_IO/ST_ERR_FORMAT (the reader's), ST_ERR_USAGE (no such key or
** region field, no field fit to be a key, a reserved key), ST_ERR_FORMAT (a
** feature without a key, a polygon GEOS cannot build), ST_ERR_LIMIT,
** ST_ERR_GEOS, ST_ERR_NOMEM.
*/
st_status st_districts_load(const st_districts_options *opt, st_diags *diags,
                            st_districts **out) ST_MUST_CHECK;
void st_districts_free(st_districts *d);

/* Number of districts; district i (borrowed from d). */
size_t st_districts_count(const st_districts *d);
const st_district *st_districts_get(const st_districts *d, size_t i);
/* Index of the district whose key is 'key', or -1. */
int32_t st_districts_find(const st_districts *d, const char *key);
/* The keys indexed by district (n entries, borrowed): the inventory's
** district names. */
const char *const *st_districts_keys(const st_districts *d);
/* The key and region fields actually used (borrowed; region may be NULL). */
const char *st_districts_key_field(const st_districts *d);
const char *st_districts_region_field(const st_districts *d);
/* The file read, the layer's CRS as the reader named it (borrowed). */
const char *st_districts_path(const st_districts *d);
const char *st_districts_crs(const st_districts *d);
/* Districts whose polygon was repaired. */
size_t st_districts_repaired(const st_districts *d);

/* ---- placement ------------------------------------------------------------ */

/*
** A placer: the districts as GEOS prepared geometries in an STRtree, built
** with the GEOS context 'gx' (borrowed; both it and 'd' must outlive the
** placer). One placer per thread. Returns owned; free with st_placer_free.
** ST_ERR_GEOS (message in a diagnostic) or ST_ERR_NOMEM on failure.
*/
typedef struct st_placer st_placer;
st_status st_placer_new(const st_districts *d, st_geos *gx, st_diags *diags,
                        st_placer **out) ST_MUST_CHECK;
void st_placer_free(st_placer *p);

/* The district covering lon/lat (x, y) by the border rule, or -1, in
** *district. ST_ERR_GEOS when GEOS fails. */
st_status st_placer_point(st_placer *p, double x, double y,
                          int32_t *district) ST_MUST_CHECK;

/*
** The representative point of g (borrowed): GEOS's point on surface (a
** point inside the polygon, the same one shapely's representative_point()
** gives); where GEOS cannot compute one (an invalid footprint kept as it
** is) the centre of the bounding box. Returns 0 when g has no coordinates.
*/
int st_placer_anchor(st_placer *p, const st_geom *g, double xy[2]);

typedef struct st_place_stats {
    uint64_t placed;        /* kept buildings in some district */
    uint64_t outside;       /* kept buildings in none */
    uint64_t aside_placed;  /* set-aside features placed (for the audit) */
    uint64_t unplaceable;   /* features without coordinates: district -1 */
} st_place_stats;

/*
** Place fs[0..n) (borrowed; f->district is set on each): kept buildings
** (ok, repaired) and set-aside features alike, so that the audit can count
** both per district. Each kept building outside every district gets a
** `place.outside` finding (severity 'outside_sev') in 'out', in the order
** of fs. 'nthreads' (1..ST_PLACE_MAX_THREADS; 0 means 1) threads share the
** work, each with its own GEOS context and placer; the result is the same
** for any number. Returns ST_OK, ST_ERR_NOMEM or ST_ERR_GEOS (diagnostic).
*/
st_status st_place_features(const st_districts *d, st_feature *const *fs, size_t n,
                            unsigned nthreads, st_severity outside_sev,
                            st_findings *out, st_diags *diags,
                            st_place_stats *stats) ST_MUST_CHECK;

#endif
