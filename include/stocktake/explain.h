/*
** stocktake/explain.h -- reading one building back from a run's output,
** for `stocktake explain`: its row in `buildings` (or in `set_aside`), its
** schema fields with provenance and rule, the rule line's text, its
** source attributes and its findings.
**
** Input:   an output of `stocktake run`: OUT.gpkg (layers buildings,
**          set_aside, findings), or OUT.geojson / OUT.geojsonl with its
**          siblings OUT.set_aside.EXT and OUT.findings.EXT.
** Output:  an st_explanation (owned), and renderings of it as text or as
**          one JSON object appended to an st_buf.
** Errors:  ST_ERR_IO no such file or unreadable; ST_ERR_FORMAT not a
**          stocktake output (no buildings layer, no bid column, a missing
**          sibling); ST_ERR_USAGE no building with that bid; ST_ERR_LIMIT a
**          value above ST_EXPLAIN_MAX_VALUE bytes. One diagnostic each.
** Limits:  ST_EXPLAIN_MAX_FINDINGS findings are kept (the rest counted);
**          a rule line is read from rule files of at most
**          ST_RULES_MAX_FILE_BYTES and shown up to ST_EXPLAIN_MAX_RULE_LINE
**          bytes.
**
** Which columns are schema fields is worked out from the layout alone
** (docs/output.md): a column X followed by X_from and X_rule is a field;
** the columns before the first field are the building's own (bid, layer,
** source_id, status, measures, flags, district); those after the last
** field are source attributes.
*/
#ifndef STOCKTAKE_EXPLAIN_H
#define STOCKTAKE_EXPLAIN_H

#include <stddef.h>
#include <stdint.h>

#include "stocktake/core.h"

#define ST_EXPLAIN_MAX_VALUE ((size_t)16 << 20)  /* one attribute value */
#define ST_EXPLAIN_MAX_FINDINGS 1000             /* findings kept per building */
#define ST_EXPLAIN_MAX_RULE_LINE 4096            /* bytes of a rule line shown */

typedef struct st_explain_pair {
    char *name;            /* column name, owned */
    char *value;           /* owned UTF-8 text, NULL when empty (NULL) */
    int numeric;           /* 1: the value is a number (integer or real) */
} st_explain_pair;

typedef struct st_explain_field {
    char *name;            /* schema field, owned */
    char *value;           /* owned, NULL when the field has no value */
    char *from;            /* provenance as written: source, derived,
                              default, drawn, unknown; owned, or NULL */
    char *rule;            /* "file:line", owned, or NULL */
    char *rule_text;       /* that line of the rule file as it reads now
                              (trimmed), owned; NULL when the file or the
                              line is not there any more */
} st_explain_field;

typedef struct st_explain_finding {
    char *code, *severity, *message;   /* owned, each may be NULL */
} st_explain_finding;

typedef struct st_explanation {
    char *path;                  /* the output file read, owned */
    uint64_t bid;
    int set_aside;               /* 0: found in buildings; 1: in set_aside */
    const char *status;          /* borrowed from own[]; NULL if absent */
    const char *reason;          /* set_aside: why (borrowed from own[]) */
    const char *duplicate_of;    /* set_aside duplicates: the kept bid */
    st_explain_pair *own;        /* the row's own columns, in column order */
    size_t nown;
    st_explain_field *fields;    /* schema fields (buildings only) */
    size_t nfields;
    st_explain_pair *source;     /* non-empty source attributes */
    size_t nsource;
    st_explain_finding *findings;/* in the order of the findings layer */
    size_t nfindings;
    uint64_t findings_total;     /* > nfindings when capped */
} st_explanation;

/*
** Find building 'bid' in the run output at 'path' (borrowed). On success
** *out returns owned (free with st_explanation_free). On failure *out is
** NULL, one diagnostic naming the file is added to 'diags' and the status
** says why (see the file comment). A GeoPackage is read with SQLite
** directly, read-only, one prepared `WHERE bid = ?` query per layer; a
** GeoJSON output is streamed through our reader until the bid is found.
*/
st_status st_explain_load(const char *path, uint64_t bid, st_diags *diags,
                          st_explanation **out) ST_MUST_CHECK;
void st_explanation_free(st_explanation *e);

/*
** The text of rule "file:line" ('rule' borrowed) as the file reads now,
** trimmed. *out returns owned (st_free), or NULL when the file cannot be
** read, is larger than ST_RULES_MAX_FILE_BYTES, or has no such line.
** Returns ST_OK or ST_ERR_NOMEM.
*/
st_status st_explain_rule_text(const char *rule, char **out) ST_MUST_CHECK;

/* Append the explanation as text for a terminal (UTF-8, lines end in \n). */
st_status st_explain_render_text(const st_explanation *e, st_buf *out) ST_MUST_CHECK;
/* Append the explanation as one JSON object (layout: docs/stocktake.1,
** section explain, and explain/explain_render.c). */
st_status st_explain_render_json(const st_explanation *e, st_buf *out) ST_MUST_CHECK;

#endif
