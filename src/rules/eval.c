/*
** rules/eval.c -- the evaluator: map -> derive -> check on one feature,
** with provenance for every schema field.
**
** Input:   a checked st_rules set (read-only, shared by threads), one
**          st_rules_ctx per thread, a feature with its source attributes
**          and the measures the geometry stage set.
** Output:  f->schema: one value per field, each with provenance (source,
**          derived or unknown here) and the "file:line" of the rule; check
**          findings; counts of unmapped source values.
** Errors:  ST_ERR_NOMEM only. A regex that hits the PCRE2 match or depth
**          limit is a 'rule.match-limit' finding and counts as no match; a
**          derived value outside the schema is a 'rule.out-of-range'
**          finding and the next derive line is tried.
** Limits:  ST_RULES_MATCH_LIMIT and ST_RULES_DEPTH_LIMIT per regex match.
**
** Semantics (docs/rules.md): map blocks run in file order, the first one
** that gives a field its value wins, and inside a block the first matching
** line wins; derive blocks fill only fields still unknown; a comparison
** with an unknown value is false.
*/
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <strings.h>

#include "rulesInt.h"

struct st_rules_ctx {
    const st_rules *R;
    pcre2_general_context *gctx;
    pcre2_match_context *mctx;
    pcre2_match_data *md;
    st_unmapped *unmapped;
    /* layer cache: attribute index -> layer field index (-1 = absent) */
    const st_fields *layer;
    uint32_t layer_count;
    const st_field *layer_items;
    int32_t *attr_field;
    st_buf fold, part, whole;
    /* the feature being evaluated */
    st_feature *f;
    st_findings *out;
    unsigned accept;        /* ACCEPT_* of the current derive line */
    const char *unreadable; /* attribute text that was not a number */
    size_t unreadable_len;
    st_status rc;
};

static void *pcre_malloc(PCRE2_SIZE n, void *data)
{
    (void)data;
    return st_malloc(n);
}

static void pcre_free(void *p, void *data)
{
    (void)data;
    st_free(p);
}

st_status st_rules_ctx_new(const st_rules *r, st_rules_ctx **out)
{
    st_rules_ctx *c = st_calloc(1, sizeof *c);
    *out = NULL;
    if (!c)
        return ST_ERR_NOMEM;
    c->R = r;
    st_buf_init(&c->fold, 0);
    st_buf_init(&c->part, 0);
    st_buf_init(&c->whole, 0);
    c->gctx = pcre2_general_context_create(pcre_malloc, pcre_free, NULL);
    if (c->gctx)
        c->mctx = pcre2_match_context_create(c->gctx);
    if (c->mctx)
        c->md = pcre2_match_data_create(1, c->gctx);
    st_status rc = c->md ? st_unmapped_new(&c->unmapped) : ST_ERR_NOMEM;
    if (rc == ST_OK && r->nattrs) {
        c->attr_field = st_malloc(r->nattrs * sizeof *c->attr_field);
        if (!c->attr_field)
            rc = ST_ERR_NOMEM;
    }
    if (rc != ST_OK) {
        st_rules_ctx_free(c);
        return rc;
    }
    pcre2_set_match_limit(c->mctx, ST_RULES_MATCH_LIMIT);
    pcre2_set_depth_limit(c->mctx, ST_RULES_DEPTH_LIMIT);
    *out = c;
    return ST_OK;
}

void st_rules_ctx_free(st_rules_ctx *c)
{
    if (!c)
        return;
    pcre2_match_data_free(c->md);
    pcre2_match_context_free(c->mctx);
    pcre2_general_context_free(c->gctx);
    st_unmapped_free(c->unmapped);
    st_free(c->attr_field);
    st_buf_free(&c->fold);
    st_buf_free(&c->part);
    st_buf_free(&c->whole);
    st_free(c);
}

st_unmapped *st_rules_ctx_unmapped(st_rules_ctx *c)
{
    return c->unmapped;
}

void st_rules_ctx_reset_layer(st_rules_ctx *c)
{
    c->layer = NULL;
}

/* Resolve the rule set's attribute names against the layer's fields:
** exact name first, else ASCII case-insensitive (shapefile columns are
** often upper case). */
static void bind_layer(st_rules_ctx *c, const st_fields *lf)
{
    if (c->layer == lf && lf && c->layer_count == lf->count && c->layer_items == lf->items)
        return;
    c->layer = lf;
    c->layer_count = lf ? lf->count : 0;
    c->layer_items = lf ? lf->items : NULL;
    for (uint32_t a = 0; a < c->R->nattrs; a++) {
        int32_t idx = lf ? st_fields_find(lf, c->R->attrs[a]) : -1;
        for (uint32_t i = 0; idx < 0 && lf && i < lf->count; i++)
            if (!strcasecmp(lf->items[i].name, c->R->attrs[a]))
                idx = (int32_t)i;
        c->attr_field[a] = idx;
    }
}

/* The trimmed, non-empty text of attribute 'a', or NULL. */
static const char *attr_text(st_rules_ctx *c, int32_t a, size_t *n)
{
    if (a < 0 || c->attr_field[a] < 0)
        return NULL;
    const char *v = st_feature_value(c->f, (uint32_t)c->attr_field[a]);
    if (!v)
        return NULL;
    *n = strlen(v);
    v = st_rtext_trim(v, n);
    return *n ? v : NULL;
}

/* ---- map ---------------------------------------------------------------- */

/* Run regex 're' (from line 'l') on s[0..n). 1 match, 0 no match (or a
** limit, reported as a finding). */
static int regex_match(st_rules_ctx *c, const rmap_line *l, const rpattern *p, const char *s,
                       size_t n, const char *attr)
{
    int r = pcre2_match(p->re, (PCRE2_SPTR)s, n, 0, 0, c->md, c->mctx);
    if (r >= 0)
        return 1;
    if (r == PCRE2_ERROR_NOMATCH || r == PCRE2_ERROR_PARTIAL)
        return 0;
    if (r == PCRE2_ERROR_NOMEMORY) {
        c->rc = ST_ERR_NOMEM;
        return 0;
    }
    const char *why = r == PCRE2_ERROR_MATCHLIMIT   ? "the match limit was hit"
                      : r == PCRE2_ERROR_DEPTHLIMIT ? "the depth limit was hit"
                      : r == PCRE2_ERROR_HEAPLIMIT  ? "the heap limit was hit"
                      : r == PCRE2_ERROR_JIT_STACKLIMIT ? "the match limit was hit (JIT stack)"
                                                        : "the match failed";
    st_status rc = st_findings_add(c->out, c->f->bid, ST_FINDING_RULE_MATCH_LIMIT,
                                   ST_SEV_WARNING, NAN, NAN,
                                   "regular expression /%.60s/ (%s) gave up on attribute '%s' "
                                   "(%zu bytes): %s; the line was taken as not matching",
                                   p->text, l->rule, attr, n, why);
    if (rc != ST_OK)
        c->rc = rc;
    return 0;
}

/* The first line of 'm' that matches s[0..n), or -1. 's' must be
** NUL-terminated at n. */
static int32_t map_find(st_rules_ctx *c, const rmap *m, const char *s, size_t n, const char *attr)
{
    const char *key = s;
    size_t klen = n;
    if (m->fold) {
        st_buf_clear(&c->fold);
        st_status rc = st_rtext_fold(s, n, m->fold, &c->fold);
        if (rc != ST_OK) {
            c->rc = rc;
            return -1;
        }
        klen = c->fold.len;
        key = klen ? c->fold.data : "";
    }
    int32_t lit = -1;
    if (m->keys.cap && strlen(key) == klen) {
        uint64_t h = 1469598103934665603ull;
        for (const char *q = key; *q; q++)
            h = (h ^ (unsigned char)*q) * 1099511628211ull;
        for (uint64_t i = h & (m->keys.cap - 1); m->keys.keys[i]; i = (i + 1) & (m->keys.cap - 1))
            if (!strcmp(m->keys.keys[i], key)) {
                lit = (int32_t)m->keys.line[i];
                break;
            }
    }
    /* Regexes see the accent-stripped text when the block ignores accents;
    ** case is handled by PCRE2's caseless mode. */
    const char *subject = (m->fold & FOLD_ACCENTS) ? key : s;
    size_t slen = (m->fold & FOLD_ACCENTS) ? klen : n;
    for (uint32_t k = 0; k < m->nregex_lines; k++) {
        uint32_t li = m->regex_lines[k];
        if (lit >= 0 && li >= (uint32_t)lit)
            break;
        const rmap_line *l = m->lines[li];
        for (uint32_t j = 0; j < l->npats; j++)
            if (l->pats[j].is_regex && regex_match(c, l, &l->pats[j], subject, slen, attr))
                return (int32_t)li;
        if (c->rc != ST_OK)
            return -1;
    }
    return lit;
}

/* Set a value to a string of the rule set (a code, the mixed value, the
** unknown value, or NULL): borrowed, not copied, since the rule set
** outlives the features (st_rules_apply). */
static void set_code(st_feature *f, int32_t field, const char *code, st_provenance from,
                     const char *rule)
{
    st_field_value *v = &f->schema[field];
    st_field_value_borrow(v, code);
    v->from = from;
    v->rule = rule;
}

/* Set a value to text made for this feature: a copy of its n bytes. */
static st_status set_text(st_feature *f, int32_t field, const char *text, size_t n,
                          st_provenance from, const char *rule)
{
    st_field_value *v = &f->schema[field];
    char *t = st_strndup(text, n);
    if (!t)
        return ST_ERR_NOMEM;
    st_field_value_take(v, t);
    v->from = from;
    v->rule = rule;
    return ST_OK;
}

/* A value with ';' whose whole text matches nothing: map each part; the
** first part that maps gives the value, unless the block says
** 'mixed as X' and the parts map to different values. Returns the line
** of the chosen value, -2 for the mixed value, -3 when every matching
** part says nothing, -1 when no part matches. */
static int32_t map_parts(st_rules_ctx *c, const rmap *m, const char *s, size_t n,
                         const char *attr)
{
    int32_t chosen = -1;
    int nothing = 0;
    const char *p = s, *end = s + n;
    while (p <= end && c->rc == ST_OK) {
        const char *semi = memchr(p, ';', (size_t)(end - p));
        size_t len = semi ? (size_t)(semi - p) : (size_t)(end - p);
        const char *part = st_rtext_trim(p, &len);
        if (len) {
            st_buf_clear(&c->part);
            if ((c->rc = st_buf_append(&c->part, part, len)) != ST_OK)
                return -1;
            int32_t li = map_find(c, m, c->part.data, c->part.len, attr);
            if (li >= 0 && !m->lines[li]->target) {
                nothing = 1;
            } else if (li >= 0 && chosen < 0) {
                chosen = li;
                if (!m->mixed)
                    return chosen;
            } else if (li >= 0 && strcmp(m->lines[li]->target, m->lines[chosen]->target)) {
                return -2;
            }
        }
        if (!semi)
            break;
        p = semi + 1;
    }
    return chosen >= 0 ? chosen : nothing ? -3 : -1;
}

static st_status run_map(st_rules_ctx *c, const rmap *m)
{
    st_feature *f = c->f;
    if (m->field < 0 || f->schema[m->field].from != ST_PROV_UNKNOWN)
        return ST_OK;
    const char *s = NULL;
    size_t n = 0;
    const char *attr = NULL;
    uint32_t i = 0;
    for (const rname *src = m->sources; src && !s; src = src->next, i++) {
        s = attr_text(c, m->source_ids[i], &n);
        attr = src->text;
    }
    if (!s)
        return ST_OK;
    /* A NUL-terminated copy: regexes and the literal table need one. */
    st_buf_clear(&c->whole);
    st_status rc = st_buf_append(&c->whole, s, n);
    if (rc != ST_OK)
        return rc;
    const char *whole = c->whole.data;
    int32_t li = map_find(c, m, whole, n, attr);
    if (li < 0 && c->rc == ST_OK && memchr(whole, ';', n))
        li = map_parts(c, m, whole, n, attr);
    const st_schema_field *fd = &c->R->fields[m->field];
    if (c->rc != ST_OK)
        rc = c->rc;
    else if (li == -2)
        set_code(f, m->field, m->mixed, ST_PROV_SOURCE, m->rule);
    else if (li == -1)
        rc = st_unmapped_add(c->unmapped, fd->name, whole, 1);
    else if (li >= 0 && m->lines[li]->target)
        set_code(f, m->field, m->lines[li]->target, ST_PROV_SOURCE, m->lines[li]->rule);
    return rc;
}

/* ---- expressions ---------------------------------------------------------- */

enum { V_NONE, V_NUM, V_TEXT, V_ATTR, V_BOOL };

typedef struct rval {
    int t;
    double num;             /* V_NUM; V_BOOL: 0 or 1 */
    const char *s;          /* V_TEXT, V_ATTR */
    size_t n;
} rval;

static const rval none = {V_NONE, 0, NULL, 0};

static double tol(double x)
{
    double a = fabs(x);
    return ST_RULES_EPSILON * (a > 1 ? a : 1);
}

static double floor_eps(double x) { return floor(x + tol(x)); }
static double ceil_eps(double x) { return ceil(x - tol(x)); }
static double round_eps(double x)
{
    double r = floor(fabs(x) + 0.5 + tol(x));
    return x < 0 ? -r : r;
}

/* An attribute's text as a number, or V_NONE (remembered as unreadable). */
static rval to_number(st_rules_ctx *c, rval v)
{
    if (v.t != V_ATTR)
        return v;
    double d;
    if (st_rtext_number(v.s, v.n, c->accept, &d))
        return (rval){V_NUM, d, NULL, 0};
    c->unreadable = v.s;
    c->unreadable_len = v.n;
    return none;
}

static rval eval(st_rules_ctx *c, const rexpr *e);

static rval eval_name(st_rules_ctx *c, const rexpr *e)
{
    const st_feature *f = c->f;
    switch (e->ref) {
    case REF_MEASURE: {
        double v = e->index == MEASURE_AREA ? f->area_m2 : f->perimeter_m;
        return isfinite(v) ? (rval){V_NUM, v, NULL, 0} : none;
    }
    case REF_FIELD: {
        const st_field_value *fv = &f->schema[e->index];
        if (fv->from == ST_PROV_UNKNOWN || !fv->text)
            return none;
        st_field_kind k = c->R->fields[e->index].kind;
        if (k == ST_KIND_INTEGER || k == ST_KIND_REAL) {
            char *end;
            double d = strtod(fv->text, &end);
            return end != fv->text ? (rval){V_NUM, d, NULL, 0} : none;
        }
        return (rval){V_TEXT, 0, fv->text, strlen(fv->text)};
    }
    case REF_ATTR: {
        size_t n;
        const char *s = attr_text(c, e->index, &n);
        return s ? (rval){V_ATTR, 0, s, n} : none;
    }
    case REF_CODE:
        return (rval){V_TEXT, 0, e->text, strlen(e->text)};
    default:
        return none;
    }
}

static rval eval_call(st_rules_ctx *c, const rexpr *e)
{
    double acc = 0;
    if (e->index == FN_YEAR) {
        rval v = eval(c, e->args[0]);
        if ((v.t == V_TEXT || v.t == V_ATTR) && st_rtext_year(v.s, v.n, &acc))
            return (rval){V_NUM, acc, NULL, 0};
        return none;
    }
    for (uint32_t i = 0; i < e->nargs; i++) {
        rval v = to_number(c, eval(c, e->args[i]));
        if (v.t != V_NUM)
            return none;
        if (i == 0)
            acc = v.num;
        else if (e->index == FN_MIN && v.num < acc)
            acc = v.num;
        else if (e->index == FN_MAX && v.num > acc)
            acc = v.num;
    }
    switch (e->index) {
    case FN_CEIL: acc = ceil_eps(acc); break;
    case FN_FLOOR: acc = floor_eps(acc); break;
    case FN_ROUND: acc = round_eps(acc); break;
    case FN_ABS: acc = fabs(acc); break;
    default: break;
    }
    return (rval){V_NUM, acc, NULL, 0};
}

static rval boolean(int b)
{
    return (rval){V_BOOL, b ? 1 : 0, NULL, 0};
}

static rval eval_compare(st_rules_ctx *c, const rexpr *e)
{
    rval a = eval(c, e->a), b = eval(c, e->b);
    if (a.t == V_NONE || b.t == V_NONE)
        return boolean(0);
    int textual = (a.t == V_TEXT || b.t == V_TEXT) || (a.t == V_ATTR && b.t == V_ATTR &&
                                                       (e->op == OP_EQ || e->op == OP_NE));
    if (textual && (e->op == OP_EQ || e->op == OP_NE)) {
        int eq = a.n == b.n && !memcmp(a.s, b.s, a.n);
        return boolean(e->op == OP_EQ ? eq : !eq);
    }
    a = to_number(c, a);
    b = to_number(c, b);
    if (a.t != V_NUM || b.t != V_NUM)
        return boolean(0);
    int eq = fabs(a.num - b.num) <= tol(a.num > b.num ? a.num : b.num);
    switch (e->op) {
    case OP_EQ: return boolean(eq);
    case OP_NE: return boolean(!eq);
    case OP_LT: return boolean(a.num < b.num && !eq);
    case OP_LE: return boolean(a.num < b.num || eq);
    case OP_GT: return boolean(a.num > b.num && !eq);
    case OP_GE: return boolean(a.num > b.num || eq);
    default: return boolean(0);
    }
}

static rval eval(st_rules_ctx *c, const rexpr *e)
{
    switch (e->kind) {
    case E_NUM: return (rval){V_NUM, e->num, NULL, 0};
    case E_STR: return (rval){V_TEXT, 0, e->text, strlen(e->text)};
    case E_NAME: return eval_name(c, e);
    case E_CALL: return eval_call(c, e);
    case E_NEG: {
        rval v = to_number(c, eval(c, e->a));
        return v.t == V_NUM ? (rval){V_NUM, -v.num, NULL, 0} : none;
    }
    case E_NOT: {
        rval v = eval(c, e->a);
        return boolean(!(v.t == V_BOOL && v.num));
    }
    case E_IS_UNKNOWN: {
        rval v = eval_name(c, e->a);
        int unknown = v.t == V_NONE;
        return boolean(e->neg ? !unknown : unknown);
    }
    case E_BIN:
        break;
    }
    if (e->op == OP_AND || e->op == OP_OR) {
        rval a = eval(c, e->a);
        int av = a.t == V_BOOL && a.num;
        if (e->op == OP_AND && !av)
            return boolean(0);
        if (e->op == OP_OR && av)
            return boolean(1);
        rval b = eval(c, e->b);
        return boolean(b.t == V_BOOL && b.num);
    }
    if (e->op <= OP_GE)
        return eval_compare(c, e);
    rval a = to_number(c, eval(c, e->a));
    rval b = to_number(c, eval(c, e->b));
    if (a.t != V_NUM || b.t != V_NUM)
        return none;
    double r;
    switch (e->op) {
    case OP_ADD: r = a.num + b.num; break;
    case OP_SUB: r = a.num - b.num; break;
    case OP_MUL: r = a.num * b.num; break;
    default:
        if (b.num == 0)
            return none;
        r = a.num / b.num;
        break;
    }
    return isfinite(r) ? (rval){V_NUM, r, NULL, 0} : none;
}

static int holds(st_rules_ctx *c, const rexpr *e)
{
    rval v = eval(c, e);
    return v.t == V_BOOL && v.num;
}

/* ---- derive ------------------------------------------------------------- */

/* Format v as field fi's value; 0 (and a finding) when it does not fit. */
static int derived_text(st_rules_ctx *c, const rderive_line *l, uint32_t fi, rval v, char *buf,
                        size_t cap)
{
    const st_schema_field *f = &c->R->fields[fi];
    if (f->kind == ST_KIND_INTEGER || f->kind == ST_KIND_REAL) {
        double d = v.num;
        if (f->kind == ST_KIND_INTEGER) {
            /* A whole number within the tolerance stays; otherwise up. */
            double r = round_eps(d);
            d = fabs(d - r) <= tol(d) ? r : ceil(d);
            snprintf(buf, cap, "%.0f", d);
        } else {
            snprintf(buf, cap, "%.10g", d);
        }
        if (f->has_range && (d < f->min || d > f->max)) {
            st_status rc = st_findings_add(c->out, c->f->bid, ST_FINDING_RULE_RANGE,
                                           ST_SEV_WARNING, NAN, NAN,
                                           "%s %s from %s is outside %g..%g; not used", f->name,
                                           buf, l->rule, f->min, f->max);
            if (rc != ST_OK)
                c->rc = rc;
            return 0;
        }
        return 1;
    }
    size_t n = v.n < cap - 1 ? v.n : cap - 1;
    memcpy(buf, v.s, n);
    buf[n] = '\0';
    if (f->kind == ST_KIND_CODE && !st_rules_field_accepts(c->R, fi, buf)) {
        st_status rc = st_findings_add(c->out, c->f->bid, ST_FINDING_RULE_RANGE, ST_SEV_WARNING,
                                       NAN, NAN, "%s '%s' from %s is not one of its codes; "
                                       "not used", f->name, buf, l->rule);
        if (rc != ST_OK)
            c->rc = rc;
        return 0;
    }
    return 1;
}

static st_status run_derive(st_rules_ctx *c, const rderive *d)
{
    if (d->field < 0 || c->f->schema[d->field].from != ST_PROV_UNKNOWN)
        return ST_OK;
    const st_schema_field *f = &c->R->fields[d->field];
    int numeric = f->kind == ST_KIND_INTEGER || f->kind == ST_KIND_REAL;
    for (const rderive_line *l = d->head; l && c->rc == ST_OK; l = l->next) {
        c->accept = l->accept;
        c->unreadable = NULL;
        if (l->when && !holds(c, l->when))
            continue;
        rval v = eval(c, l->value);
        if (numeric)
            v = to_number(c, v);
        if (v.t == V_NONE || v.t == V_BOOL) {
            /* A bare attribute that is not a number is worth listing; free
            ** text searched for "R+2" is not. */
            if (c->unreadable && l->value->kind == E_NAME && !(l->accept & ACCEPT_GROUND_PLUS)) {
                char *s = st_strndup(c->unreadable, c->unreadable_len);
                st_status rc = s ? st_unmapped_add(c->unmapped, f->name, s, 1) : ST_ERR_NOMEM;
                st_free(s);
                if (rc != ST_OK)
                    return rc;
            }
            continue;
        }
        char buf[512];
        if (!derived_text(c, l, (uint32_t)d->field, v, buf, sizeof buf))
            continue;
        return set_text(c->f, d->field, buf, strlen(buf), ST_PROV_DERIVED, l->rule);
    }
    c->accept = 0;
    return c->rc;
}

/* ---- apply -------------------------------------------------------------- */

static st_status reset_schema(const st_rules *R, st_feature *f)
{
    if (f->schema && f->nschema == R->nfields) {
        for (uint32_t i = 0; i < f->nschema; i++) {
            st_field_value_take(&f->schema[i], NULL);
            f->schema[i] = (st_field_value){.from = ST_PROV_UNKNOWN};
        }
        return ST_OK;
    }
    for (uint32_t i = 0; f->schema && i < f->nschema; i++)
        st_field_value_take(&f->schema[i], NULL);
    st_free(f->schema);
    f->nschema = 0;
    f->schema = st_calloc(R->nfields ? R->nfields : 1, sizeof *f->schema);
    if (!f->schema)
        return ST_ERR_NOMEM;
    f->nschema = R->nfields;
    return ST_OK;
}

st_status st_rules_apply(st_rules_ctx *c, st_feature *f, const st_fields *layer_fields,
                         st_findings *out)
{
    const st_rules *R = c->R;
    st_status rc = reset_schema(R, f);
    if (rc != ST_OK)
        return rc;
    bind_layer(c, layer_fields);
    c->f = f;
    c->out = out;
    c->rc = ST_OK;
    for (uint32_t i = 0; i < R->nmaps && rc == ST_OK; i++)
        rc = run_map(c, R->maps[i]);
    for (uint32_t i = 0; i < R->nderives && rc == ST_OK; i++)
        rc = run_derive(c, R->derives[i]);
    for (uint32_t i = 0; i < R->nchecks && rc == ST_OK; i++) {
        const rcheck *k = R->checks[i];
        if (holds(c, k->cond))
            rc = st_findings_add(out, f->bid, ST_FINDING_RULE_CHECK, k->severity, NAN, NAN,
                                 "%s (%s)", k->message, k->rule);
    }
    if (rc == ST_OK)
        rc = c->rc;
    for (uint32_t i = 0; i < R->nfields && rc == ST_OK; i++) {
        st_field_value *v = &f->schema[i];
        if (v->from != ST_PROV_UNKNOWN)
            continue;
        const st_schema_field *fd = &R->fields[i];
        set_code(f, (int32_t)i, fd->unknown, ST_PROV_UNKNOWN,
                 fd->unknown_rule ? fd->unknown_rule : fd->rule);
    }
    c->f = NULL;
    c->out = NULL;
    return rc;
}

int st_rules_when(st_rules_ctx *c, const st_default_rule *d, const st_feature *f)
{
    if (!d->when)
        return 1;
    st_feature *saved = c->f;
    c->f = (st_feature *)f;   /* evaluation only reads the feature */
    int r = holds(c, (const rexpr *)d->when);
    c->f = saved;
    return r;
}
