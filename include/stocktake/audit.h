/*
** stocktake/audit.h -- the completeness audit: what a run found, district by
** district and for the whole run. Plain data, filled by src/audit/ from the
** features after every stage, read by the report writers (report.h) and the
** inventory's `districts` layer.
**
** Ownership: an st_audit owns every string and array in it, except the
** district geometries, which are borrowed from the district layer (place.h)
** and must outlive the audit. Free with st_audit_free().
**
** Order of 'districts': the district layer's districts in layer order
** (nlayer_districts of them), then the districts the reference names but
** the layer lacks (ref ST_REF_ABSENT, no geometry), then "none" last (the
** buildings outside every district; always present).
*/
#ifndef STOCKTAKE_AUDIT_H
#define STOCKTAKE_AUDIT_H

#include <stdint.h>
#include "stocktake/core.h"
#include "stocktake/feature.h"
#include "stocktake/finding.h"
#include "stocktake/defaults.h"
#include "stocktake/place.h"
#include "stocktake/rules.h"

#define ST_NPROV 5   /* entries of st_provenance */

/* Completeness of one schema field: buildings by where the value came from,
** indexed by st_provenance (unknown, drawn, default, derived, source). */
typedef struct st_audit_field {
    uint64_t by_prov[ST_NPROV];
} st_audit_field;

typedef enum {
    ST_REF_NONE = 0,       /* no reference count for this district */
    ST_REF_OK,             /* ratio within the thresholds */
    ST_REF_UNDER,          /* ratio below the under-mapped threshold */
    ST_REF_OVER,           /* ratio above the over-mapped threshold */
    ST_REF_ABSENT          /* in the reference, no such district in the layer */
} st_ref_state;

const char *st_ref_state_name(st_ref_state s);   /* "none", "ok", "under", ... */

typedef struct st_audit_code {
    const char *code;      /* static */
    st_severity severity;
    uint64_t count;
} st_audit_code;

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
    st_audit_code *codes;  /* findings by code, most frequent first, owned */
    size_t ncodes;
    int64_t expected;      /* reference count, -1 without one */
    double ratio;          /* buildings / expected, NAN without one (or
                              when 0 are expected) */
    st_ref_state ref;
    char *geom_repair;     /* why the district polygon was repaired
                              (GEOSMakeValid), or NULL */
} st_audit_district;

typedef struct st_audit_count {
    char *field;           /* schema field (or source attribute) */
    char *value;           /* the value */
    uint64_t count;
} st_audit_count;

typedef struct st_audit_learned {
    char *district;        /* where the default was learned (a region key
                              when per_region) */
    char *field;
    uint64_t from_buildings;  /* buildings with an observed (source or
                                 derived) value it came from */
    char *distribution;    /* "URM 60%, RM 30%, TMB 10%" */
    int per_region;        /* 1: learned for a region */
    char *rule;            /* the learn line, "file:line" */
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
    st_audit_district *districts; /* see the order above; "none" last */
    size_t ndistricts;
    size_t nlayer_districts;      /* districts[0..n) come from the layer */
    int has_reference;            /* --reference was given */
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

/* ---- reference counts ------------------------------------------------------ */

/*
** Expected building counts per district key, from a CSV file: a header row
** (whatever it says), then the key in the first column and the count (a
** whole number >= 0) in the second; further columns are allowed and not
** read. Limits: ST_AUDIT_MAX_REFERENCE_BYTES, ST_PLACE_MAX_DISTRICTS rows.
** A bad file is ST_ERR_FORMAT (or IO, LIMIT) with a diagnostic
** "file:line: ...". Returns owned; free with st_reference_free.
*/
#define ST_AUDIT_MAX_REFERENCE_BYTES (64u << 20)
typedef struct st_reference st_reference;
st_status st_reference_load(const char *path, st_diags *diags,
                            st_reference **out) ST_MUST_CHECK;
void st_reference_free(st_reference *r);
size_t st_reference_count(const st_reference *r);
/* Row i: key (borrowed) and count; rows in file order. */
const char *st_reference_key(const st_reference *r, size_t i, uint64_t *count);

/* ---- computing the audit ----------------------------------------------------- */

/* Thresholds of the completeness ratio when no gate line sets them
** (common practice, no source): below 0.5 under-mapped, above 1.5
** over-mapped (duplicates, or a wrong boundary). */
#define ST_AUDIT_UNDER_RATIO 0.5
#define ST_AUDIT_OVER_RATIO 1.5

typedef struct st_audit_input {
    st_feature *const *features;  /* every feature of the run, kept and set
                                     aside, f->district set (borrowed) */
    size_t nfeatures;
    const st_findings *findings;  /* the run's findings (borrowed) */
    const st_districts *districts;/* or NULL: everything is "none" */
    const st_rules *rules;        /* or NULL: no schema, no gate lines */
    const st_defaults *defaults;  /* or NULL: nothing learned */
    const st_unmapped *unmapped;  /* or NULL */
    const st_reference *reference;/* or NULL */
    int fail_on;                  /* --fail-on: a severity, or -1 */
} st_audit_input;

/*
** Aggregate everything the audit reports from 'in' (borrowed; the
** districts must outlive the result) and evaluate the gate: the rules'
** gate lines, then --fail-on. Under/over-mapped thresholds come from the
** first `district-completeness <`/`<=` and `>`/`>=` gate lines, else the
** defaults above. Returns owned (free with st_audit_free); ST_ERR_NOMEM.
*/
st_status st_audit_compute(const st_audit_input *in, st_diags *diags,
                           st_audit **out) ST_MUST_CHECK;

#endif
