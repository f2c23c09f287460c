/*
** stocktake/finding.h -- findings: what a stage found about one building.
**
** A finding is data, not a diagnostic: the run goes on and the finding is
** written to the output's `findings` layer. Codes are short, lowercase,
** dotted names of our own ("geom.self-intersection"), each listed with its
** meaning in docs/findings.md; a code is a static string owned by the
** module that defines it.
*/
#ifndef STOCKTAKE_FINDING_H
#define STOCKTAKE_FINDING_H

#include <stdint.h>
#include "stocktake/core.h"

typedef struct st_finding {
    uint64_t bid;          /* building the finding is about */
    const char *code;      /* static, e.g. "geom.self-intersection" */
    st_severity severity;  /* note, warning or error */
    char *message;         /* owned, human-readable detail */
    double x, y;           /* lon/lat where it is, NAN when not a point */
} st_finding;

typedef struct st_findings {
    st_finding *items;
    size_t count, cap;
} st_findings;

void st_findings_init(st_findings *f);
void st_findings_free(st_findings *f);
/* Add one finding; message formatted and owned by the list. */
st_status st_findings_add(st_findings *f, uint64_t bid, const char *code,
                          st_severity sev, double x, double y,
                          const char *fmt, ...) ST_PRINTF(7, 8) ST_MUST_CHECK;
/* Move all findings of 'src' to the end of 'dst' (src left empty). */
st_status st_findings_move(st_findings *dst, st_findings *src) ST_MUST_CHECK;
/* Replace the n findings of 'dst' from position 'at' (at + n <= count)
** with all of 'src', in its order; src is left empty. ST_ERR_NOMEM leaves
** both lists as they were. */
st_status st_findings_replace(st_findings *dst, size_t at, size_t n,
                              st_findings *src) ST_MUST_CHECK;
/* "note", "warning", "error". */
const char *st_severity_name(st_severity s);

#endif
