/*
** rules/rulesInt.h -- private to src/rules: the arena, tokens, the syntax
** tree and the rule set's inner layout.
**
** Everything built while loading (source texts excepted) lives in one arena
** owned by the st_rules set and is freed with it in one call. The syntax
** tree is also the compiled form: the checker annotates nodes in place
** (resolved field indexes, compiled regular expressions).
*/
#ifndef STOCKTAKE_RULES_INT_H
#define STOCKTAKE_RULES_INT_H

#include <pcre2.h>
#include <stdint.h>

#include "stocktake/rules.h"

/* ---- arena (rules/arena.c) ------------------------------------------- */

typedef struct st_arena_block st_arena_block;
typedef struct st_arena {
    st_arena_block *head;
    size_t used;            /* bytes used in head */
    size_t total;           /* bytes handed out, all blocks */
} st_arena;

void st_arena_init(st_arena *a);
void st_arena_free(st_arena *a);
/* Zeroed, 16-byte aligned memory owned by the arena, or NULL. */
void *st_arena_alloc(st_arena *a, size_t n);
char *st_arena_strndup(st_arena *a, const char *s, size_t n);
char *st_arena_printf(st_arena *a, const char *fmt, ...) ST_PRINTF(2, 3);

/* ---- sources ---------------------------------------------------------- */

typedef struct rsource {
    char *name;             /* display path, owned (st_malloc) */
    char *real;             /* realpath for include cycles, owned, or NULL */
    char *text;             /* NUL-terminated file content, owned */
    size_t len;
} rsource;

/* A place in a source: byte span plus its line and column (1-based). */
typedef struct rspan {
    uint32_t src;
    uint32_t off, len;
    uint32_t line, col;
} rspan;

/* ---- tokens (rules/lex.c) ------------------------------------------- */

typedef enum {
    T_EOF = 0, T_NL, T_NAME, T_NUMBER, T_STRING, T_REGEX,
    T_ARROW, T_EQ, T_NE, T_LT, T_LE, T_GT, T_GE,
    T_PLUS, T_MINUS, T_STAR, T_SLASH, T_LPAREN, T_RPAREN,
    T_COMMA, T_DOTDOT, T_PERCENT, T_QUESTION, T_ERROR
} rtok_type;

typedef struct rtok {
    rtok_type type;
    rspan span;
    const char *text;       /* NAME/NUMBER: the span; STRING/REGEX: the
                               unescaped content (arena); ERROR: message */
    size_t tlen;
    double num;             /* NUMBER */
    int caseless;           /* REGEX with the i flag */
} rtok;

struct st_rules;
typedef struct rlexer {
    struct st_rules *R;
    uint32_t src;
    const char *p, *start, *end;
    uint32_t line;
    const char *line_start;
    rtok_type prev;         /* last token type, to tell a regex from '/' */
} rlexer;

void st_rlex_init(rlexer *lx, struct st_rules *R, uint32_t src);
/* The next token; ERROR tokens carry their message in 'text'. Returns
** ST_ERR_NOMEM only when the arena cannot hold a string. */
st_status st_rlex_next(rlexer *lx, rtok *t);
const char *st_rtok_name(rtok_type t);

/* ---- syntax tree ----------------------------------------------------- */

typedef enum {
    E_NUM, E_STR, E_NAME, E_CALL, E_NEG, E_NOT, E_BIN, E_IS_UNKNOWN
} rexpr_kind;

typedef enum {
    OP_OR, OP_AND, OP_EQ, OP_NE, OP_LT, OP_LE, OP_GT, OP_GE,
    OP_ADD, OP_SUB, OP_MUL, OP_DIV
} rop;

/* What a NAME in an expression resolved to (set by the checker). */
typedef enum { REF_NONE, REF_MEASURE, REF_FIELD, REF_ATTR, REF_CODE } rref;
enum { MEASURE_AREA, MEASURE_PERIMETER, MEASURE_COUNT };
enum { FN_CEIL, FN_FLOOR, FN_ROUND, FN_MIN, FN_MAX, FN_ABS, FN_YEAR, FN_COUNT };

typedef struct rexpr {
    rexpr_kind kind;
    rspan span;
    rop op;
    double num;             /* E_NUM, after its unit */
    const char *text;       /* E_STR, E_NAME, E_CALL name */
    struct rexpr *a, *b;    /* operands; E_IS_UNKNOWN: a, negated in 'neg' */
    struct rexpr **args;
    uint32_t nargs;
    int neg;
    rref ref;               /* checker */
    int32_t index;          /* field, measure, attribute or function index */
} rexpr;

/* A value to match in a map line. */
typedef struct rpattern {
    int is_regex;
    int caseless;           /* regex /.../i or the block ignores case */
    const char *text;       /* literal as written / regex source */
    const char *key;        /* literal folded per the block's options */
    rspan span;
    pcre2_code *re;         /* compiled by the checker, freed with the set */
} rpattern;

typedef struct rmap_line {
    rspan span;
    rpattern *pats;
    uint32_t npats;
    const char *target;     /* NULL: "nothing" (the source says nothing) */
    rspan target_span;
    const char *rule;
    struct rmap_line *next;
} rmap_line;

typedef struct rname {
    const char *text;
    rspan span;
    int32_t index;          /* checker: attribute index */
    struct rname *next;
} rname;

enum { FOLD_CASE = 1, FOLD_ACCENTS = 2 };

/* Open-addressing table of literal keys -> first line index. */
typedef struct rkeymap {
    const char **keys;
    uint32_t *line;         /* index into the block's lines */
    uint32_t cap;           /* power of two, 0 = empty */
} rkeymap;

typedef struct rmap {
    rspan span;
    const char *rule;       /* "file:line" of the header (for 'mixed as') */
    const char *field_name;
    rspan field_span;
    int32_t field;
    rname *sources;
    uint32_t nsources;
    int32_t *source_ids;    /* checker: attribute index per source */
    unsigned fold;          /* FOLD_* */
    const char *mixed;      /* code when parts of a list map differently */
    rspan mixed_span;
    rmap_line *lines_head, *lines_tail;
    rmap_line **lines;      /* checker: array of the lines */
    uint32_t nlines;
    uint32_t *regex_lines;  /* indexes of lines having a regex */
    uint32_t nregex_lines;
    rkeymap keys;
    struct rmap *next;
} rmap;

enum { ACCEPT_WORDS = 1, ACCEPT_GROUND_PLUS = 2 };

typedef struct rderive_line {
    rspan span;
    rexpr *value;
    rexpr *when;            /* or NULL */
    unsigned accept;        /* ACCEPT_* */
    const char *rule;
    struct rderive_line *next;
} rderive_line;

typedef struct rderive {
    rspan span;
    const char *field_name;
    rspan field_span;
    int32_t field;
    rderive_line *head, *tail;
    struct rderive *next;
} rderive;

typedef struct rcheck {
    rspan span;
    rexpr *cond;
    st_severity severity;
    const char *message;
    const char *rule;
    struct rcheck *next;
} rcheck;

typedef struct rfield {
    rspan span;
    st_schema_field pub;
    const char **codes;
    rspan *code_spans;
    struct rfield *next;
} rfield;

typedef struct runknown {
    rspan span;
    const char *field_name;
    rspan field_span;
    const char *value;
    rspan value_span;
    const char *rule;
    struct runknown *next;
} runknown;

typedef struct rsetting {
    rspan span;
    st_rule_setting pub;
    rspan unit_span;
    struct rsetting *next;
} rsetting;

typedef struct rchoice {
    const char *value;
    rspan span;
    int has_share;
    double percent;
    struct rchoice *next;
} rchoice;

typedef struct rdefault {
    rspan span;
    int kind;               /* 0 set, 1 table, 2 learn */
    st_scope scope;
    const char *pattern;
    rexpr *when;
    const char *field_name;
    rspan field_span;
    rchoice *choices;
    uint32_t nchoices;
    const char *path;       /* table */
    uint32_t min_count;     /* learn */
    const char *rule;
    struct rdefault *next;
} rdefault;

typedef struct rgate {
    rspan span;
    st_gate_rule pub;
    const char *arg;        /* severity word or field name */
    rspan arg_span;
    rspan value_span;       /* the threshold as written */
    struct rgate *next;
} rgate;

/* ---- the rule set ------------------------------------------------------ */

struct st_rules {
    st_arena arena;
    st_diags *diags;
    rsource *sources;
    uint32_t nsources, cap_sources;
    size_t errors;          /* errors of this load */
    size_t nrules;          /* rule lines, for ST_RULES_MAX_RULES */
    int stopped;            /* too many errors or a limit: stop parsing */

    /* parse results, in file order (includes expanded in place) */
    rfield *fields_head, *fields_tail;
    runknown *unknown_head, *unknown_tail;
    rsetting *set_head, *set_tail;
    rmap *maps_head, *maps_tail;
    rderive *derives_head, *derives_tail;
    rcheck *checks_head, *checks_tail;
    rdefault *defaults_head, *defaults_tail;
    rgate *gates_head, *gates_tail;

    /* checker results */
    st_schema_field *fields;
    rfield **field_nodes;
    uint32_t nfields;
    st_rule_setting *settings;
    size_t nsettings;
    st_default_rule *defaults;
    rexpr **default_when;
    size_t ndefaults;
    st_default_table *tables;
    size_t ntables;
    st_default_learn *learns;
    size_t nlearns;
    st_gate_rule *gates;
    size_t ngates;
    rmap **maps;
    uint32_t nmaps;
    rderive **derives;
    uint32_t nderives;
    rcheck **checks;
    uint32_t nchecks;
    const char **attrs;     /* source attribute names referenced */
    uint32_t nattrs, cap_attrs;

    pcre2_general_context *gctx;
    pcre2_compile_context *cctx;
    pcre2_code **codes;     /* every compiled regex, to free */
    uint32_t ncodes, cap_codes;
};

/* Add a diagnostic at 'span' with the source line as excerpt. Counts
** errors; returns 'code'. */
st_status st_rdiag(struct st_rules *R, st_severity sev, st_status code,
                   const rspan *span, const char *fmt, ...) ST_PRINTF(5, 6);
/* "file:line" for a span, in the arena (NULL on no memory). */
const char *st_rrule_name(struct st_rules *R, const rspan *span);

/* rules/parse.c: parse source 'src' (already in R->sources); includes are
** loaded through st_rules_include. */
st_status st_rparse_source(struct st_rules *R, uint32_t src, int depth,
                           const char **chain, int nchain);
/* rules/load.c: read and parse an included file. */
st_status st_rules_include(struct st_rules *R, const rspan *at,
                           const char *path, int depth,
                           const char **chain, int nchain);

/* rules/check.c: resolve and compile the whole set. */
st_status st_rcheck_set(struct st_rules *R);

/* rules/text.c -- text helpers. */
/* Fold 's' per FOLD_* into 'out' (appends). */
st_status st_rtext_fold(const char *s, size_t n, unsigned fold, st_buf *out) ST_MUST_CHECK;
/* Damerau-free Levenshtein distance, capped at 'cap'+1. */
size_t st_rtext_distance(const char *a, const char *b, size_t cap);
/* Read a number from an attribute value: "4", "4.5", "9 m", "30 ft",
** "3-4" (upper bound), "3;4" (largest), number words (ACCEPT_WORDS),
** "R+2" (ACCEPT_GROUND_PLUS: 3). Lengths come out in metres. Returns 1
** and *out on success, 0 when the text is not a number. */
int st_rtext_number(const char *s, size_t n, unsigned accept, double *out);
/* The first run of exactly four digits in s[0..n) as a year, if any. */
int st_rtext_year(const char *s, size_t n, double *out);
/* Trim ASCII spaces of s[0..*n) in place (returns new start). */
const char *st_rtext_trim(const char *s, size_t *n);

#endif
