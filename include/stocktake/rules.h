/*
** stocktake/rules.h -- the rule language: load and check rule files, read
** what they declare (schema, footprint settings, defaults, gates), and
** apply map -> derive -> check to one feature at a time.
**
** Input:   rule files (UTF-8 text, docs/rules.md is the reference).
** Output:  an st_rules set (read-only once loaded, shared by threads), one
**          st_rules_ctx per thread for evaluation, st_unmapped counters.
** Errors:  every problem in a rule file is a diagnostic with file, line,
**          column, length and the source line (rendered with a caret);
**          loading fails with ST_ERR_RULE when any of them is an error.
** Limits:  ST_RULES_MAX_FILE_BYTES per file, ST_RULES_MAX_TOKEN bytes per
**          token, ST_RULES_MAX_DEPTH nesting of expressions,
**          ST_RULES_MAX_INCLUDE_DEPTH includes, ST_RULES_MAX_RULES rule lines;
**          regular expressions run under PCRE2 match and depth limits.
**
** Precedence of a schema field's value (DESIGN.md): source > derived >
** default/drawn > unknown. Map rules set `source`, derive rules `derived`;
** defaults are only parsed and checked here and exposed as plain data for
** the stage that applies them. Every value set keeps the "file:line" of the
** rule that set it; those strings are owned by the st_rules set.
*/
#ifndef STOCKTAKE_RULES_H
#define STOCKTAKE_RULES_H

#include <stddef.h>
#include <stdint.h>

#include "stocktake/core.h"
#include "stocktake/feature.h"
#include "stocktake/finding.h"

#define ST_RULES_MAX_FILE_BYTES (4u << 20)  /* one rule file */
#define ST_RULES_MAX_TOKEN 4096             /* one name, string or regex */
#define ST_RULES_MAX_DEPTH 64               /* nested parentheses/operators */
#define ST_RULES_MAX_INCLUDE_DEPTH 16       /* include inside include ... */
#define ST_RULES_MAX_RULES 100000           /* rule lines in a set */
#define ST_RULES_MAX_ERRORS 50              /* errors before loading stops */
#define ST_RULES_MATCH_LIMIT 1000000        /* pcre2_set_match_limit */
#define ST_RULES_DEPTH_LIMIT 10000          /* pcre2_set_depth_limit */

/* Relative tolerance of floor/ceil/round and of integer checks: a quotient
** within 1e-9 (times max(1,|x|)) of a whole number counts as that number,
** so floor(9.6 / 3.2) is 3, not 2 (REFERENCES.md section 7). */
#define ST_RULES_EPSILON 1e-9

/* Finding codes this module emits (docs/findings.md). */
#define ST_FINDING_RULE_CHECK "rule.check"            /* a check rule fired */
#define ST_FINDING_RULE_RANGE "rule.out-of-range"     /* derived value refused */
#define ST_FINDING_RULE_MATCH_LIMIT "rule.match-limit"/* a regex gave up */

typedef struct st_rules st_rules;          /* a loaded, checked rule set */
typedef struct st_rules_ctx st_rules_ctx;  /* per-thread evaluation state */
typedef struct st_unmapped st_unmapped;    /* counts of unmapped values */

/* ---- loading -------------------------------------------------------- */

/*
** Load the rule files 'paths[0..n)' (borrowed) as one set, following their
** includes, and check it. Diagnostics (errors and warnings) go to 'diags'.
** On success *out is the set (returns owned; free with st_rules_free) and
** ST_OK is returned even when there were warnings. On failure *out is NULL
** and ST_ERR_RULE (any error in the text), ST_ERR_IO (a file cannot be
** read), ST_ERR_LIMIT or ST_ERR_NOMEM is returned.
*/
st_status st_rules_load(const char *const *paths, size_t n, st_diags *diags,
                        st_rules **out) ST_MUST_CHECK;

/*
** The same for rule text held in memory: 'name' is the file name shown in
** diagnostics and provenance, 'text[0..len)' is copied. Includes are
** resolved relative to the directory of 'name'.
*/
st_status st_rules_load_text(const char *name, const char *text, size_t len,
                             st_diags *diags, st_rules **out) ST_MUST_CHECK;

void st_rules_free(st_rules *r);

/*
** The SHA-256 of every text the set was read from, the files given and
** every file they include, in the order read (each text preceded by its
** length, so moving bytes between files changes it too), as 64 lower-case
** hex digits in 'hex' (65 bytes with the NUL). A job split into parts
** records it so merge refuses parts whose included files changed.
*/
void st_rules_digest(const st_rules *r, char hex[65]);

/* ---- the schema ------------------------------------------------------ */

typedef enum {
    ST_KIND_CODE = 0,   /* one of a list of codes */
    ST_KIND_INTEGER,    /* a whole number, optionally within a range */
    ST_KIND_REAL,       /* a number, optionally within a range */
    ST_KIND_TEXT        /* free text */
} st_field_kind;

const char *st_field_kind_name(st_field_kind k);   /* "codes", "integer", ... */

typedef struct st_schema_field {
    const char *name;
    st_field_kind kind;
    const char *const *codes;  /* ST_KIND_CODE: the list, in declared order */
    uint32_t ncodes;
    int has_range;             /* integer/real: min..max given */
    double min, max;
    const char *unknown;       /* value written when nothing applies, or NULL */
    const char *rule;          /* "file:line" of the field's declaration */
    const char *unknown_rule;  /* "file:line" of its 'unknown' line, or NULL */
} st_schema_field;

/* Number of schema fields; field i (0 <= i < count), borrowed from 'r'. */
uint32_t st_rules_field_count(const st_rules *r);
const st_schema_field *st_rules_field(const st_rules *r, uint32_t i);
/* Index of the field called 'name', or -1. */
int32_t st_rules_field_find(const st_rules *r, const char *name);
/* 1 if 'text' is a valid value of field i (code in list, number in range). */
int st_rules_field_accepts(const st_rules *r, uint32_t i, const char *text);

/* ---- footprint settings ---------------------------------------------- */

/*
** One line of a `footprint` block, checked for shape only: the geometry
** stage owns the meaning and maps each onto its configuration, e.g.
** st_footprint_config_set(cfg, s->name, s->si, s->unit_si, s->severity).
*/
typedef struct st_rule_setting {
    const char *name;      /* "min-area" */
    int has_number;
    double number;         /* as written: 6 */
    const char *unit;      /* as written: "m2", "ft2", "m", "ft", "%", or "" */
    double si;             /* number in m, m2 or as a ratio (% / 100) */
    const char *unit_si;   /* "m", "m2", "ratio" or "" */
    int has_severity;
    st_severity severity;  /* note, warning, error */
    const char *word;      /* a trailing word ("make-valid"), or NULL */
    const char *rule;      /* "file:line" */
} st_rule_setting;

size_t st_rules_setting_count(const st_rules *r);
const st_rule_setting *st_rules_setting(const st_rules *r, size_t i);
/* The last setting called 'name' (later lines override earlier), or NULL. */
const st_rule_setting *st_rules_setting_find(const st_rules *r, const char *name);

/* ---- defaults (applied by a later stage) ------------------------------ */

typedef enum {
    ST_SCOPE_DISTRICT = 0,  /* districts whose key matches 'pattern' */
    ST_SCOPE_REGION,        /* regions (parent key) matching 'pattern' */
    ST_SCOPE_EVERYWHERE
} st_scope;

typedef struct st_default_choice {
    const char *value;     /* a valid value of the field */
    double share;          /* 0..1; the shares of one rule sum to 1 */
} st_default_choice;

typedef struct st_default_rule {
    st_scope scope;
    const char *pattern;   /* glob with '*' and '?', NULL for everywhere */
    const void *when;      /* condition, or NULL; test with st_rules_when */
    uint32_t field;
    const st_default_choice *choices;  /* most likely first as written */
    uint32_t nchoices;     /* 1 = a single value (share 1) */
    const char *rule;      /* "file:line" */
} st_default_rule;

typedef struct st_default_table {
    const char *path;      /* resolved relative to the rule file */
    const char *rule;
} st_default_table;

typedef struct st_default_learn {
    uint32_t field;
    st_scope per;          /* ST_SCOPE_DISTRICT or ST_SCOPE_REGION */
    uint32_t min_count;    /* learn only where at least this many are known */
    const char *rule;
} st_default_learn;

size_t st_rules_default_count(const st_rules *r);
const st_default_rule *st_rules_default(const st_rules *r, size_t i);
size_t st_rules_table_count(const st_rules *r);
const st_default_table *st_rules_table(const st_rules *r, size_t i);
size_t st_rules_learn_count(const st_rules *r);
const st_default_learn *st_rules_learn(const st_rules *r, size_t i);

/* 1 if 'text' matches the glob 'pattern' ('*' any run, '?' one byte),
** compared ASCII case-insensitively. */
int st_rules_glob(const char *pattern, const char *text);

/* ---- quality gate (applied by the audit stage) ------------------------ */

typedef enum { ST_GATE_FAIL = 0, ST_GATE_WARN } st_gate_action;

typedef enum {
    ST_METRIC_SHARE = 0,          /* share of buildings with a finding of
                                     'severity' or worse, 0..1 */
    ST_METRIC_COMPLETENESS,       /* share of buildings whose 'field' is not
                                     unknown (any provenance but unknown) */
    ST_METRIC_OBSERVED,           /* share whose 'field' is source or derived */
    ST_METRIC_DISTRICT_COMPLETENESS /* per district: buildings found divided
                                     by the reference count; the condition
                                     holds when it holds for any district */
} st_gate_metric;

typedef enum { ST_CMP_EQ = 0, ST_CMP_NE, ST_CMP_LT, ST_CMP_LE, ST_CMP_GT, ST_CMP_GE } st_cmp;

typedef struct st_gate_rule {
    st_gate_action action;
    st_gate_metric metric;
    st_severity severity;  /* ST_METRIC_SHARE */
    int32_t field;         /* completeness metrics, else -1 */
    st_cmp cmp;
    double threshold;      /* a ratio (50% is 0.5) */
    const char *text;      /* the condition as written, for messages */
    const char *rule;
} st_gate_rule;

size_t st_rules_gate_count(const st_rules *r);
const st_gate_rule *st_rules_gate(const st_rules *r, size_t i);
/* 1 if 'value' cmp 'threshold'. */
int st_rules_gate_holds(const st_gate_rule *g, double value);

/* ---- evaluation ------------------------------------------------------- */

/*
** A per-thread evaluation context for 'r' (borrowed: it must outlive the
** context). It owns its PCRE2 match data and an st_unmapped counter.
** Returns owned; free with st_rules_ctx_free.
*/
st_status st_rules_ctx_new(const st_rules *r, st_rules_ctx **out) ST_MUST_CHECK;
void st_rules_ctx_free(st_rules_ctx *c);

/*
** Run map -> derive -> check on 'f'. 'layer_fields' (borrowed) names the
** feature's source attributes: f->values[i] belongs to field i. The
** geometry stage must have set f->area_m2 and f->perimeter_m.
** Fills f->schema/f->nschema (one value per schema field, replacing what
** was there) with value, provenance and rule; fields nothing applied to get
** the schema's unknown value with provenance unknown. Values that are
** strings of the rule set (codes, the mixed and unknown values) borrow
** them (st_field_value.borrowed): R must outlive the features' use of
** them, as it does for the rule's "file:line". Check rules and
** refused values add findings to 'out'. Unmapped source values are counted
** in the context's counter. The context caches how the layer's field names
** resolve, keyed on the st_fields object and its count: call
** st_rules_ctx_reset_layer before reusing the same object for another layer.
** Returns ST_OK or ST_ERR_NOMEM.
*/
st_status st_rules_apply(st_rules_ctx *c, st_feature *f,
                         const st_fields *layer_fields,
                         st_findings *out) ST_MUST_CHECK;
void st_rules_ctx_reset_layer(st_rules_ctx *c);

/* 1 if the condition of default rule 'd' holds for 'f' (no condition: 1).
** Uses the feature's current schema values. */
int st_rules_when(st_rules_ctx *c, const st_default_rule *d, const st_feature *f);

/* 1 if the condition of default rule 'd' reads schema field 'field' (the
** defaults stage fills a field after the fields its conditions read). */
int st_rules_when_uses(const st_default_rule *d, uint32_t field);

/* The context's counter of unmapped values (borrowed from 'c'). */
st_unmapped *st_rules_ctx_unmapped(st_rules_ctx *c);

/* ---- unmapped source values ------------------------------------------ */

/*
** Counts of (field, value) pairs no map line matched, mergeable across
** threads. Values are cut to ST_UNMAPPED_MAX_VALUE bytes; beyond
** ST_UNMAPPED_MAX_ENTRIES distinct pairs further new pairs are only
** counted in 'dropped'.
*/
#define ST_UNMAPPED_MAX_VALUE 200
#define ST_UNMAPPED_MAX_ENTRIES 100000

typedef struct st_unmapped_item {
    const char *field;     /* schema field name */
    const char *value;     /* the source value */
    uint64_t count;
} st_unmapped_item;

/* Returns owned empty counter; free with st_unmapped_free. */
st_status st_unmapped_new(st_unmapped **out) ST_MUST_CHECK;
void st_unmapped_free(st_unmapped *u);
/* Count one more (field, value); both borrowed and copied. */
st_status st_unmapped_add(st_unmapped *u, const char *field, const char *value,
                          uint64_t n) ST_MUST_CHECK;
/* Add every count of 'src' (borrowed) to 'dst'. */
st_status st_unmapped_merge(st_unmapped *dst, const st_unmapped *src) ST_MUST_CHECK;
size_t st_unmapped_size(const st_unmapped *u);
uint64_t st_unmapped_dropped(const st_unmapped *u);
/* All pairs, most frequent first, ties by field then value. *items returns
** owned (free with st_free); its strings are borrowed from 'u' and valid
** until 'u' changes. */
st_status st_unmapped_sorted(const st_unmapped *u, st_unmapped_item **items,
                             size_t *n) ST_MUST_CHECK;

#endif
