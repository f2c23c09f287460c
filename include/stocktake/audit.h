/*
** stocktake/audit.h -- the completeness audit: what a run found, district by
** district and for the whole run. Plain data, filled by src/audit/ from the
** features after every stage, read by the report writers (report.h) and the
** inventory's `districts` layer.
**
** Ownership: an st_audit owns every string and array in it, except the
** district geometries, which are borrowed from the district layer (place.h)
** and must outlive the audit. Free with st_audit_free().
*/
#ifndef STOCKTAKE_AUDIT_H
#define STOCKTAKE_AUDIT_H

#include <stdint.h>
#include "stocktake/core.h"
#include "stocktake/feature.h"
#include "stocktake/finding.h"

#define ST_NPROV 5   /* entries of st_provenance */

/* Completeness of one schema field: buildings by where the value came from,
** indexed by st_provenance (unknown, drawn, default, derived, source). */
typedef struct st_audit_field {
    uint64_t by_prov[ST_NPROV];
} st_audit_field;

typedef enum {
    ST_REF_NONE = 0,       /* no reference given for this district */
    ST_REF_OK,             /* ratio within the thresholds */
    ST_REF_UNDER,          /* ratio below the under-mapped threshold */
    ST_REF_OVER,           /* ratio above the over-mapped threshold */
    ST_REF_ABSENT          /* in the reference, no such district in the layer */
} st_ref_state;

const char *st_ref_state_name(st_ref_state s);   /* "none", "ok", "under", ... */

typedef struct st_audit_district {
    char *key;             /* district key; "none" for the unassigned bucket */
    char *region;          /* parent region key, or NULL */
    const st_geom *geom;   /* borrowed district polygon (lon/lat), or NULL */
    uint64_t buildings;    /* kept: ok + repaired */
    uint64_t repaired, duplicate, rejected;
    double footprint_m2;   /* sum of area_m2 of kept buildings */
    double floor_m2;       /* sum of area_m2 * storeys where storeys known */
    uint64_t floor_known;  /* buildings contributing to floor_m2 */
    st_audit_field *fields;/* nfields (the schema's), owned */
    uint64_t findings[3];  /* by severity */
    int64_t expected;      /* reference count, -1 without one */
    double ratio;          /* buildings / expected, NAN without one */
    st_ref_state ref;
} st_audit_district;

typedef struct st_audit_count {
    char *field;           /* schema field (or source attribute) */
    char *value;           /* the value */
    uint64_t count;
} st_audit_count;

typedef struct st_audit_code {
    const char *code;      /* static */
    st_severity severity;
    uint64_t count;
} st_audit_code;

typedef struct st_audit_learned {
    char *district;        /* where the default was learned */
    char *field;
    uint64_t from_buildings;  /* buildings with a source value it came from */
    char *distribution;    /* "URM 60%, RM 30%, TMB 10%" */
} st_audit_learned;

typedef struct st_audit_gate {
    char *statement;       /* the gate as written */
    char *rule;            /* "file:line" or "--fail-on" */
    double value, limit;   /* measured value and the threshold */
    int passed;            /* 1: the condition does not hold */
    int fails;             /* 1: a `fail` line or --fail-on; 0: `warn` */
    char *detail;          /* e.g. "share(error) = 0.034 > 0.02" */
} st_audit_gate;

typedef struct st_audit {
    char **fields;         /* schema field names, nfields */
    uint32_t nfields;
    int32_t storeys_field; /* index of the storeys field, -1 if none */
    st_audit_district *districts; /* one per district, then "none" last */
    size_t ndistricts;
    st_audit_district total;      /* the whole run (key "all") */
    st_audit_code *codes;  /* findings by code, most frequent first */
    size_t ncodes;
    st_audit_count *unmapped;     /* source values no map line matched */
    size_t nunmapped;
    st_audit_learned *learned;
    size_t nlearned;
    st_audit_gate *gates;
    size_t ngates;
    int gate_failed;
    double under_ratio, over_ratio;  /* thresholds used for ST_REF_* */
    char **ref_unknown;    /* reference keys with no district in the layer */
    size_t nref_unknown;
} st_audit;

void st_audit_free(st_audit *a);

#endif
