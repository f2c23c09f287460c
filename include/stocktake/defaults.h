/*
** stocktake/defaults.h -- filling the fields that are still unknown after
** map and derive, from defaults by district, then region, then everywhere,
** with provenance `default` (the most likely value) or `drawn` (a value
** drawn from the distribution with the run's seed).
**
** Input:   a loaded rule set (rules.h: inline default lines, `table` CSV
**          files, `learn` lines), the district keys and their regions,
**          the kept buildings with their schema values after map/derive.
** Output:  f->schema[i] filled where it was unknown and a default applies;
**          the list of defaults learned from the data (for the audit).
** Errors:  a defaults table that is not valid CSV, names an unknown field
**          or value, or whose shares do not add up: ST_ERR_RULE (bad
**          content) or ST_ERR_FORMAT (bad CSV) with a diagnostic
**          "file:line: ..."; ST_ERR_IO when it cannot be read; ST_ERR_LIMIT.
** Limits:  ST_DEFAULTS_MAX_TABLE_BYTES a table, ST_DEFAULTS_MAX_ROWS rows in
**          all tables, ST_CSV_MAX_CELL bytes a cell and ST_CSV_MAX_COLUMNS
**          columns (csvread.h).
**
** Which default applies (docs/rules.md, "How defaults are chosen"): for a
** building in district D of region R, for each unknown field, the first of
**   1. the distribution learned for D (a `learn ... per district` line,
**      where D has at least N buildings whose field is observed),
**   2. inline `in district` lines whose pattern matches D, in file order,
**   3. `table` rows with scope `district` matching D, in file order,
**   4.-6. the same three for R (`learn ... per region`, `in region`,
**      table rows with scope `region`),
**   7. `everywhere` lines, 8. table rows with scope `everywhere`,
** whose condition holds. A building in no district only gets 7 and 8.
** Fields are filled in an order where a field comes after the fields its
** defaults' conditions read (so "material by occupancy" sees a defaulted
** occupancy); among independent fields, schema order.
**
** Reproducibility: the draw for (building, field) uses a hash of the seed,
** the building's bid and the field index, so it does not depend on the
** order buildings are processed in: same seed, inputs and rules give the
** same values.
*/
#ifndef STOCKTAKE_DEFAULTS_H
#define STOCKTAKE_DEFAULTS_H

#include <stddef.h>
#include <stdint.h>

#include "stocktake/core.h"
#include "stocktake/feature.h"
#include "stocktake/rules.h"

#define ST_DEFAULTS_MAX_TABLE_BYTES (64u << 20)  /* one defaults CSV */
#define ST_DEFAULTS_MAX_ROWS 1000000u            /* rows of all tables */

typedef enum {
    ST_FILL_MOST_LIKELY = 0,  /* the value with the largest share; `default` */
    ST_FILL_DRAW              /* drawn by share with the seed; `drawn` */
} st_fill_mode;

/* "most-likely", "draw". */
const char *st_fill_mode_name(st_fill_mode m);

/* Where buildings are: district keys and each district's region (NULL when
** it has none), indexed like f->district. All borrowed. */
typedef struct st_defaults_places {
    const char *const *district;
    const char *const *region;   /* may be NULL: no regions at all */
    size_t n;
} st_defaults_places;

/* One default learned from the data (for the report). */
typedef struct st_defaults_learned {
    const char *where;          /* district or region key (borrowed) */
    int per_region;             /* 1: learned for a region */
    uint32_t field;             /* schema field index */
    uint64_t from_buildings;    /* buildings with an observed value */
    const char *distribution;   /* "URM 60%, RM 30%, TMB 10%" */
    const char *rule;           /* the `learn` line, "file:line" */
} st_defaults_learned;

typedef struct st_defaults st_defaults;

/*
** Prepare the defaults of 'rules' (borrowed; must outlive the result) for
** the districts in 'places' (borrowed and copied): reads every `table`,
** matches every pattern once per district. Returns owned (free with
** st_defaults_free); on failure *out is NULL with a diagnostic.
*/
st_status st_defaults_new(const st_rules *rules, const st_defaults_places *places,
                          st_diags *diags, st_defaults **out) ST_MUST_CHECK;
void st_defaults_free(st_defaults *d);

/*
** Learn the distributions the `learn` lines ask for from fs[0..n)
** (borrowed; only kept buildings count, and only values whose provenance
** is source or derived). Call once, after map/derive and before applying.
*/
st_status st_defaults_learn(st_defaults *d, st_feature *const *fs, size_t n) ST_MUST_CHECK;

/*
** Fill the unknown fields of f (a kept building after map/derive; its
** f->district indexes 'places'). 'ctx' evaluates inline conditions
** (borrowed, of the same rule set). Values set keep the rule's "file:line"
** and borrow their text (owned by 'rules' or by 'd': d must outlive the
** features' use of them).
*/
st_status st_defaults_apply(st_defaults *d, st_rules_ctx *ctx, st_feature *f,
                            st_fill_mode mode, uint64_t seed) ST_MUST_CHECK;

/* Defaults learned (after st_defaults_learn), in order of the learn lines,
** then of districts/regions; entry i borrowed from d. */
size_t st_defaults_learned_count(const st_defaults *d);
const st_defaults_learned *st_defaults_learned_get(const st_defaults *d, size_t i);

/*
** The draw: a uniform number in [0, 1) from (seed, bid, field), the same on
** every platform (a SplitMix64 hash; 53 bits). Exposed for tests.
*/
double st_defaults_uniform(uint64_t seed, uint64_t bid, uint32_t field);

#endif
