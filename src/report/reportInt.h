/*
** report/reportInt.h -- private to the report writers: a text sink whose
** first error sticks (so rendering code reads straight through), escaping,
** number formatting, derived figures shared by JSON, HTML and text, the
** palettes, and the SVG parts (svg.c).
*/
#ifndef STOCKTAKE_REPORT_INT_H
#define STOCKTAKE_REPORT_INT_H

#include "stocktake/report.h"

/* A sink: appends to 'b'; after the first failure every call is a no-op
** and 'rc' keeps the failure. */
typedef struct st_rout {
    st_buf *b;
    st_status rc;
} st_rout;

void st_rout_puts(st_rout *o, const char *s);
void st_rout_printf(st_rout *o, const char *fmt, ...) ST_PRINTF(2, 3);
/* Text escaped for HTML text and quoted attribute values (& < > " '). */
void st_rout_esc(st_rout *o, const char *s);
/* A count with narrow no-break spaces between thousands: "12 345". */
void st_rout_count(st_rout *o, uint64_t n);
/* A share 0..1 as a percentage with 'dec' decimals, "–" when NaN. */
void st_rout_pct(st_rout *o, double share, int dec);

/* ---- figures derived from the audit ------------------------------------ */

/* Sum of a field's counts over every provenance. */
uint64_t st_rep_field_total(const st_audit_field *f);
/* Over every schema field of district 'd': share of values with provenance
** in [lo, hi] (st_provenance order), NaN when there are no values. */
double st_rep_prov_share(const st_audit *a, const st_audit_district *d,
                         st_provenance lo, st_provenance hi);
/* Share of assumed values (default or drawn). */
double st_rep_assumed_share(const st_audit *a, const st_audit_district *d);
/* "none", "ok", "under", "over", "absent". */
const char *st_rep_ref_name(st_ref_state s);
/* Words for a person: "no reference", "complete", "under-mapped" ... */
const char *st_rep_ref_words(st_ref_state s);
/* The gate results to show: the audit's, or (without an audit) one built
** from the run's --fail-on outcome in *fallback. */
size_t st_rep_gates(const st_report_input *in, st_audit_gate *fallback,
                    const st_audit_gate **out);
/* Source values no map line matched: the audit's list, or without an
** audit the run's. Entry i's strings are borrowed from the input. */
size_t st_rep_unmapped_count(const st_report_input *in);
void st_rep_unmapped_at(const st_report_input *in, size_t i, const char **field,
                        const char **value, uint64_t *count);
/* "passed", "FAILED" (a fail line that holds) or "warning" (a warn line
** that holds: reported, does not fail the run). */
const char *st_rep_gate_word(const st_audit_gate *g);
/* 1 when the run failed its gate. */
int st_rep_gate_failed(const st_report_input *in);
/* Totals over every input layer. */
void st_rep_balance_total(const st_run_result *r, st_run_layer *total);
/* Districts with a polygon (the map's shapes). */
size_t st_rep_mapped_districts(const st_audit *a);

/* ---- palettes (light to dark; checked in tests/unit/test_report.c) ---- */

#define ST_REP_CLASSES 5
extern const char *const st_rep_ratio_colours[ST_REP_CLASSES];
extern const char *const st_rep_assumed_colours[ST_REP_CLASSES];
extern const double st_rep_ratio_breaks[ST_REP_CLASSES - 1];
extern const double st_rep_assumed_breaks[ST_REP_CLASSES - 1];
/* Provenance colours indexed by st_provenance; severity by st_severity. */
extern const char *const st_rep_prov_colours[ST_NPROV];
extern const char *const st_rep_sev_colours[3];
/* Class of 'v' for the breaks (0..ST_REP_CLASSES-1). */
int st_rep_class(double v, const double *breaks);

/* ---- SVG parts (svg.c) --------------------------------------------------- */

/* The district map with both shadings and their legends. */
void st_rep_svg_map(st_rout *o, const st_audit *a);
void st_rep_svg_findings(st_rout *o, const st_run_result *r);
void st_rep_svg_provenance(st_rout *o, const st_audit *a);
void st_rep_svg_area(st_rout *o, const st_report_dist *d);
void st_rep_svg_storeys(st_rout *o, const st_report_dist *d);

/* ---- projection used by the map (exposed for tests) --------------------- */

/* Spherical Lambert azimuthal equal-area centred on (lon0, lat0), degrees
** in, unit-sphere coordinates out (north up). */
void st_rep_laea(double lon0, double lat0, double lon, double lat, double *x, double *y);
/* Douglas-Peucker on a closed ring of n points (xy pairs, first == last),
** tolerance 'tol'; keeps at least four distinct corners of any ring that
** has them. Writes kept flags into keep[n]. Needs n >= 4. Returns count. */
size_t st_rep_simplify_ring(const double *xy, size_t n, double tol, unsigned char *keep,
                            size_t *stack);

#endif
