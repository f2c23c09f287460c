/*
** rules/check.c -- the checker: resolves names and types over the parsed
** set, compiles regular expressions and literal tables, and builds the
** plain data the API exposes (schema, settings, defaults, gates).
**
** Input:   the statement lists parse.c built.
** Output:  arrays in the set's arena; syntax nodes annotated in place.
** Errors:  unknown fields (with "did you mean"), values outside the
**          schema, type mismatches, regexes PCRE2 rejects (the caret at
**          PCRE2's error offset), distributions not adding up to 100%:
**          errors. Map lines that can never apply (an identical value
**          earlier, or a value an earlier regex already matches), unknown
**          footprint settings: warnings.
** Limits:  inherited from the parser; regexes compile with PCRE2 memory
**          through st_malloc.
*/
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <strings.h>
#include <unistd.h>

#include "rulesInt.h"

typedef enum { TY_ERR, TY_NUM, TY_TEXT, TY_BOOL, TY_ANY } rtype;

/* Footprint setting names the geometry and neighbour stages accept
** (docs/footprint.md, docs/neighbours.md; mapped in pipeline/settings.c);
** others are kept but warned about here, and refused by `run`. */
static const char *const known_settings[] = {
    "min-area", "max-area", "min-compactness", "max-vertices", "spike-angle",
    "max-area-change", "repair", "repair-method",
    "overlap", "near-duplicate", "contained",
};

static const char *const measures[MEASURE_COUNT] = {"area_m2", "perimeter_m"};
static const char *const functions[FN_COUNT] = {"ceil", "floor", "round", "min",
                                                "max",  "abs",   "year"};

/* ---- helpers -------------------------------------------------------- */

static void *alloc(st_rules *R, size_t n, st_status *rc)
{
    void *p = st_arena_alloc(&R->arena, n ? n : 1);
    if (!p)
        *rc = ST_ERR_NOMEM;
    return p;
}

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

/* The closest of 'names' to 'word' within distance 2, or NULL. */
static const char *closest(const char *word, const char *const *names, size_t n)
{
    const char *best = NULL;
    for (size_t i = 0; i < n; i++)
        if (!strcasecmp(word, names[i]))
            return names[i];   /* 'res' for 'RES' */
    if (strlen(word) < 3)
        return NULL;   /* a suggestion for 'b' is noise */
    size_t bestd = strlen(word) <= 4 ? 2 : 3;
    for (size_t i = 0; i < n; i++) {
        size_t d = st_rtext_distance(word, names[i], 2);
        if (d < bestd) {
            bestd = d;
            best = names[i];
        }
    }
    return best;
}

static int32_t find_field(st_rules *R, const char *name)
{
    for (uint32_t i = 0; i < R->nfields; i++)
        if (!strcmp(R->fields[i].name, name))
            return (int32_t)i;
    return -1;
}

static const char *closest_field(st_rules *R, const char *name)
{
    const char *names[512];
    size_t n = 0;
    for (uint32_t i = 0; i < R->nfields && n < 512; i++)
        names[n++] = R->fields[i].name;
    return closest(name, names, n);
}

/* Resolve a field name or report "unknown field" with a suggestion. */
static int32_t need_field(st_rules *R, const char *name, const rspan *span)
{
    int32_t f = find_field(R, name);
    if (f >= 0)
        return f;
    const char *hint = closest_field(R, name);
    if (hint)
        st_rdiag(R, ST_SEV_ERROR, ST_ERR_RULE, span, "unknown field '%s' (did you mean '%s'?)",
                 name, hint);
    else if (R->nfields == 0)
        st_rdiag(R, ST_SEV_ERROR, ST_ERR_RULE, span,
                 "unknown field '%s' (no schema declares any field)", name);
    else
        st_rdiag(R, ST_SEV_ERROR, ST_ERR_RULE, span, "unknown field '%s'", name);
    return -1;
}

/* 1 if 'text' is a valid value of field f; otherwise 0 and, when 'span'
** is given, an error saying why. */
static int value_fits(st_rules *R, uint32_t fi, const char *text, const rspan *span)
{
    const st_schema_field *f = &R->fields[fi];
    if (f->kind == ST_KIND_TEXT)
        return 1;
    if (f->kind == ST_KIND_CODE) {
        for (uint32_t i = 0; i < f->ncodes; i++)
            if (!strcmp(f->codes[i], text))
                return 1;
        if (span) {
            const char *hint = closest(text, f->codes, f->ncodes);
            if (hint)
                st_rdiag(R, ST_SEV_ERROR, ST_ERR_RULE, span,
                         "'%s' is not a code of field '%s' (did you mean '%s'?)", text, f->name,
                         hint);
            else
                st_rdiag(R, ST_SEV_ERROR, ST_ERR_RULE, span, "'%s' is not a code of field '%s'",
                         text, f->name);
        }
        return 0;
    }
    char *end;
    double v = strtod(text, &end);
    if (end == text || *end != '\0' || !isfinite(v)) {
        if (span)
            st_rdiag(R, ST_SEV_ERROR, ST_ERR_RULE, span, "'%s' is not a number (field '%s' is %s)",
                     text, f->name, st_field_kind_name(f->kind));
        return 0;
    }
    if (f->kind == ST_KIND_INTEGER && v != floor(v)) {
        if (span)
            st_rdiag(R, ST_SEV_ERROR, ST_ERR_RULE, span,
                     "'%s' is not a whole number (field '%s' is integer)", text, f->name);
        return 0;
    }
    if (f->has_range && (v < f->min || v > f->max)) {
        if (span)
            st_rdiag(R, ST_SEV_ERROR, ST_ERR_RULE, span,
                     "%s is outside the range %g..%g of field '%s'", text, f->min, f->max, f->name);
        return 0;
    }
    return 1;
}

int st_rules_field_accepts(const st_rules *r, uint32_t i, const char *text)
{
    return i < r->nfields && text && value_fits((st_rules *)r, i, text, NULL);
}

static int32_t intern_attr(st_rules *R, const char *name, st_status *rc)
{
    for (uint32_t i = 0; i < R->nattrs; i++)
        if (!strcmp(R->attrs[i], name))
            return (int32_t)i;
    if (R->nattrs == R->cap_attrs) {
        uint32_t cap = R->cap_attrs ? R->cap_attrs * 2 : 16;
        const char **a = st_realloc(R->attrs, cap * sizeof *a);
        if (!a) {
            *rc = ST_ERR_NOMEM;
            return -1;
        }
        R->attrs = a;
        R->cap_attrs = cap;
    }
    R->attrs[R->nattrs] = name;
    return (int32_t)R->nattrs++;
}

/* ---- schema ----------------------------------------------------------- */

static st_status check_schema(st_rules *R)
{
    st_status rc = ST_OK;
    uint32_t n = 0;
    for (rfield *f = R->fields_head; f; f = f->next)
        n++;
    R->fields = alloc(R, n * sizeof *R->fields, &rc);
    R->field_nodes = alloc(R, n * sizeof *R->field_nodes, &rc);
    if (rc != ST_OK)
        return rc;
    for (rfield *f = R->fields_head; f; f = f->next) {
        int32_t dup = find_field(R, f->pub.name);
        if (dup >= 0) {
            const rspan *first = &R->field_nodes[dup]->span;
            st_rdiag(R, ST_SEV_ERROR, ST_ERR_RULE, &f->span,
                     "field '%s' is declared twice (first at %s:%u:%u)", f->pub.name,
                     R->sources[first->src].name, first->line, first->col);
            continue;
        }
        for (uint32_t i = 0; i < f->pub.ncodes; i++)
            for (uint32_t k = 0; k < i; k++)
                if (!strcmp(f->codes[i], f->codes[k])) {
                    st_rdiag(R, ST_SEV_WARNING, ST_ERR_RULE, &f->code_spans[i],
                             "code '%s' is listed twice", f->codes[i]);
                    break;
                }
        R->field_nodes[R->nfields] = f;
        R->fields[R->nfields++] = f->pub;
    }
    for (runknown *u = R->unknown_head; u; u = u->next) {
        int32_t fi = need_field(R, u->field_name, &u->field_span);
        if (fi < 0)
            continue;
        st_schema_field *f = &R->fields[fi];
        if (f->unknown_rule) {
            st_rdiag(R, ST_SEV_ERROR, ST_ERR_RULE, &u->span,
                     "field '%s' already has an unknown value (at %s)", f->name, f->unknown_rule);
            continue;
        }
        if (!value_fits(R, (uint32_t)fi, u->value, &u->value_span))
            continue;
        f->unknown = u->value;
        f->unknown_rule = u->rule;
    }
    return ST_OK;
}

/* ---- footprint -------------------------------------------------------- */

static st_status check_settings(st_rules *R)
{
    st_status rc = ST_OK;
    size_t n = 0;
    for (rsetting *s = R->set_head; s; s = s->next)
        n++;
    R->settings = alloc(R, n * sizeof *R->settings, &rc);
    if (rc != ST_OK)
        return rc;
    size_t nk = sizeof known_settings / sizeof *known_settings;
    for (rsetting *s = R->set_head; s; s = s->next) {
        int known = 0;
        for (size_t i = 0; i < nk; i++)
            if (!strcmp(s->pub.name, known_settings[i]))
                known = 1;
        if (!known) {
            const char *hint = closest(s->pub.name, known_settings, nk);
            if (hint)
                st_rdiag(R, ST_SEV_WARNING, ST_ERR_RULE, &s->span,
                         "footprint setting '%s' is not a documented one (did you mean '%s'?)",
                         s->pub.name, hint);
            else
                st_rdiag(R, ST_SEV_WARNING, ST_ERR_RULE, &s->span,
                         "footprint setting '%s' is not a documented one", s->pub.name);
        }
        if (s->pub.has_number && !strcmp(s->pub.unit, "%") &&
            (s->pub.number < 0 || s->pub.number > 100))
            st_rdiag(R, ST_SEV_ERROR, ST_ERR_RULE, &s->unit_span,
                     "a share must be between 0%% and 100%%");
        R->settings[R->nsettings++] = s->pub;
    }
    return ST_OK;
}

/* ---- expressions ------------------------------------------------------ */

enum { CTX_DERIVE, CTX_FIELDS };   /* attributes allowed / fields only */

static const char *type_name(rtype t)
{
    switch (t) {
    case TY_NUM: return "a number";
    case TY_TEXT: return "text";
    case TY_BOOL: return "a condition";
    case TY_ANY: return "an attribute";
    default: return "an error";
    }
}

static rtype check_expr(st_rules *R, rexpr *e, int ctx, st_status *rc);

/* Resolve a bare name: measure, then field, then (derive only) attribute. */
static rtype check_name(st_rules *R, rexpr *e, int ctx, st_status *rc)
{
    for (int i = 0; i < MEASURE_COUNT; i++)
        if (!strcmp(e->text, measures[i])) {
            e->ref = REF_MEASURE;
            e->index = i;
            return TY_NUM;
        }
    int32_t fi = find_field(R, e->text);
    if (fi >= 0) {
        e->ref = REF_FIELD;
        e->index = fi;
        st_field_kind k = R->fields[fi].kind;
        return k == ST_KIND_INTEGER || k == ST_KIND_REAL ? TY_NUM : TY_TEXT;
    }
    if (ctx == CTX_FIELDS) {
        const char *names[520];
        size_t n = 0;
        for (uint32_t i = 0; i < R->nfields && n < 512; i++)
            names[n++] = R->fields[i].name;
        names[n++] = measures[0];
        names[n++] = measures[1];
        const char *hint = closest(e->text, names, n);
        if (hint)
            st_rdiag(R, ST_SEV_ERROR, ST_ERR_RULE, &e->span,
                     "unknown field '%s' (did you mean '%s'?)", e->text, hint);
        else
            st_rdiag(R, ST_SEV_ERROR, ST_ERR_RULE, &e->span,
                     "unknown field or measure '%s'", e->text);
        return TY_ERR;
    }
    /* Attributes may well be named like fields ("height" and "height_m"):
    ** only a one-letter slip earns a warning. */
    const char *hint = closest_field(R, e->text);
    if (hint && st_rtext_distance(e->text, hint, 1) <= 1)
        st_rdiag(R, ST_SEV_WARNING, ST_ERR_RULE, &e->span,
                 "'%s' is read as a source attribute (did you mean the field '%s'?)", e->text,
                 hint);
    e->ref = REF_ATTR;
    e->index = intern_attr(R, e->text, rc);
    return TY_ANY;
}

/* In "field = NAME" the NAME is a code of the field when it names nothing
** else. Returns 1 when it resolved 'e' that way. */
static int resolve_code(st_rules *R, rexpr *field, rexpr *e)
{
    if (field->kind != E_NAME || e->kind != E_NAME)
        return 0;
    int32_t fi = find_field(R, field->text);
    if (fi < 0 || R->fields[fi].kind != ST_KIND_CODE)
        return 0;
    if (find_field(R, e->text) >= 0)
        return 0;
    for (int i = 0; i < MEASURE_COUNT; i++)
        if (!strcmp(e->text, measures[i]))
            return 0;
    e->ref = REF_CODE;
    e->index = fi;
    value_fits(R, (uint32_t)fi, e->text, &e->span);
    return 1;
}

static int numeric(rtype t) { return t == TY_NUM || t == TY_ANY; }

static rtype check_binary(st_rules *R, rexpr *e, int ctx, st_status *rc)
{
    rtype a, b;
    if ((e->op == OP_EQ || e->op == OP_NE) && resolve_code(R, e->a, e->b)) {
        a = check_expr(R, e->a, ctx, rc);
        b = TY_TEXT;
    } else if ((e->op == OP_EQ || e->op == OP_NE) && resolve_code(R, e->b, e->a)) {
        a = TY_TEXT;
        b = check_expr(R, e->b, ctx, rc);
    } else {
        a = check_expr(R, e->a, ctx, rc);
        b = check_expr(R, e->b, ctx, rc);
    }
    if (a == TY_ERR || b == TY_ERR)
        return TY_ERR;
    switch (e->op) {
    case OP_OR:
    case OP_AND:
        if (a != TY_BOOL || b != TY_BOOL) {
            st_rdiag(R, ST_SEV_ERROR, ST_ERR_RULE, a != TY_BOOL ? &e->a->span : &e->b->span,
                     "'%s' joins conditions, but this is %s", e->op == OP_OR ? "or" : "and",
                     type_name(a != TY_BOOL ? a : b));
            return TY_ERR;
        }
        return TY_BOOL;
    case OP_EQ:
    case OP_NE:
        if (a == TY_BOOL || b == TY_BOOL || (a == TY_NUM && b == TY_TEXT) ||
            (a == TY_TEXT && b == TY_NUM)) {
            st_rdiag(R, ST_SEV_ERROR, ST_ERR_RULE, &e->span, "cannot compare %s with %s",
                     type_name(a), type_name(b));
            return TY_ERR;
        }
        return TY_BOOL;
    case OP_LT:
    case OP_LE:
    case OP_GT:
    case OP_GE:
    case OP_ADD:
    case OP_SUB:
    case OP_MUL:
    case OP_DIV:
        if (!numeric(a) || !numeric(b)) {
            st_rdiag(R, ST_SEV_ERROR, ST_ERR_RULE, !numeric(a) ? &e->a->span : &e->b->span,
                     "expected a number here, found %s", type_name(!numeric(a) ? a : b));
            return TY_ERR;
        }
        return e->op >= OP_ADD ? TY_NUM : TY_BOOL;
    }
    return TY_ERR;
}

static rtype check_call(st_rules *R, rexpr *e, int ctx, st_status *rc)
{
    /* attribute("roof shape"): an attribute whose name is not a plain name.
    ** The call becomes a name node. */
    if (!strcmp(e->text, "attribute")) {
        if (ctx != CTX_DERIVE || e->nargs != 1 || e->args[0]->kind != E_STR) {
            st_rdiag(R, ST_SEV_ERROR, ST_ERR_RULE, &e->span,
                     ctx != CTX_DERIVE ? "attribute() is only available in derive"
                                       : "attribute() takes one attribute name in double quotes");
            return TY_ERR;
        }
        e->kind = E_NAME;
        e->text = e->args[0]->text;
        e->ref = REF_ATTR;
        e->index = intern_attr(R, e->text, rc);
        return TY_ANY;
    }
    int fn = -1;
    for (int i = 0; i < FN_COUNT; i++)
        if (!strcmp(e->text, functions[i]))
            fn = i;
    if (fn < 0) {
        const char *hint = closest(e->text, functions, FN_COUNT);
        if (hint)
            st_rdiag(R, ST_SEV_ERROR, ST_ERR_RULE, &e->span,
                     "unknown function '%s' (did you mean '%s'?)", e->text, hint);
        else
            st_rdiag(R, ST_SEV_ERROR, ST_ERR_RULE, &e->span,
                     "unknown function '%s' (known: ceil, floor, round, min, max, abs, year, "
                     "attribute)", e->text);
        return TY_ERR;
    }
    e->index = fn;
    int variadic = fn == FN_MIN || fn == FN_MAX;
    if ((variadic && e->nargs < 1) || (!variadic && e->nargs != 1)) {
        st_rdiag(R, ST_SEV_ERROR, ST_ERR_RULE, &e->span, "%s takes %s", e->text,
                 variadic ? "one or more numbers" : "one number");
        return TY_ERR;
    }
    rtype out = TY_NUM;
    for (uint32_t i = 0; i < e->nargs; i++) {
        rtype t = check_expr(R, e->args[i], ctx, rc);
        if (t == TY_ERR)
            out = TY_ERR;
        else if (fn == FN_YEAR && t != TY_TEXT && t != TY_ANY) {
            st_rdiag(R, ST_SEV_ERROR, ST_ERR_RULE, &e->args[i]->span,
                     "year() reads a date written as text, found %s", type_name(t));
            out = TY_ERR;
        } else if (fn != FN_YEAR && !numeric(t)) {
            st_rdiag(R, ST_SEV_ERROR, ST_ERR_RULE, &e->args[i]->span,
                     "expected a number here, found %s", type_name(t));
            out = TY_ERR;
        }
    }
    return out;
}

static rtype check_expr(st_rules *R, rexpr *e, int ctx, st_status *rc)
{
    switch (e->kind) {
    case E_NUM: return TY_NUM;
    case E_STR: return TY_TEXT;
    case E_NAME: return check_name(R, e, ctx, rc);
    case E_CALL: return check_call(R, e, ctx, rc);
    case E_NEG: {
        rtype t = check_expr(R, e->a, ctx, rc);
        if (t != TY_ERR && !numeric(t)) {
            st_rdiag(R, ST_SEV_ERROR, ST_ERR_RULE, &e->a->span,
                     "expected a number after '-', found %s", type_name(t));
            return TY_ERR;
        }
        return t == TY_ERR ? TY_ERR : TY_NUM;
    }
    case E_NOT: {
        rtype t = check_expr(R, e->a, ctx, rc);
        if (t != TY_ERR && t != TY_BOOL) {
            st_rdiag(R, ST_SEV_ERROR, ST_ERR_RULE, &e->a->span,
                     "'not' needs a condition, found %s", type_name(t));
            return TY_ERR;
        }
        return t == TY_ERR ? TY_ERR : TY_BOOL;
    }
    case E_IS_UNKNOWN:
        if (e->a->kind != E_NAME) {
            st_rdiag(R, ST_SEV_ERROR, ST_ERR_RULE, &e->a->span,
                     "'is unknown' applies to a field or attribute name");
            return TY_ERR;
        }
        return check_expr(R, e->a, ctx, rc) == TY_ERR ? TY_ERR : TY_BOOL;
    case E_BIN:
        return check_binary(R, e, ctx, rc);
    }
    return TY_ERR;
}

static int check_condition(st_rules *R, rexpr *e, int ctx, st_status *rc)
{
    rtype t = check_expr(R, e, ctx, rc);
    if (t == TY_ERR)
        return 0;
    if (t != TY_BOOL) {
        st_rdiag(R, ST_SEV_ERROR, ST_ERR_RULE, &e->span,
                 "expected a condition (a comparison), found %s", type_name(t));
        return 0;
    }
    return 1;
}

/* ---- maps --------------------------------------------------------------- */

static uint64_t hash_str(const char *s)
{
    uint64_t h = 1469598103934665603ull;
    for (; *s; s++)
        h = (h ^ (unsigned char)*s) * 1099511628211ull;
    return h;
}

/* First line whose literal is 'key', or -1. */
static int32_t keymap_find(const rkeymap *k, const char *key)
{
    if (!k->cap)
        return -1;
    for (uint64_t i = hash_str(key) & (k->cap - 1);; i = (i + 1) & (k->cap - 1)) {
        if (!k->keys[i])
            return -1;
        if (!strcmp(k->keys[i], key))
            return (int32_t)k->line[i];
    }
}

static void keymap_put(rkeymap *k, const char *key, uint32_t line)
{
    uint64_t i = hash_str(key) & (k->cap - 1);
    while (k->keys[i])
        i = (i + 1) & (k->cap - 1);
    k->keys[i] = key;
    k->line[i] = line;
}

/* Map a PCRE2 error offset (in the unescaped pattern) to the source span. */
static rspan regex_offset_span(st_rules *R, const rpattern *p, size_t offset)
{
    const char *src = R->sources[p->span.src].text + p->span.off + 1;
    size_t pos = 0, k = 0;
    while (pos < offset && k + 1 < p->span.len) {
        if (src[k] == '\\' && src[k + 1] == '/')
            k += 2;
        else if (src[k] == '\\')
            k += 2, pos++;
        else
            k++;
        pos++;
    }
    rspan s = p->span;
    s.off += 1 + (uint32_t)k;
    s.col += 1 + (uint32_t)k;
    s.len = 1;
    return s;
}

static st_status compile_regex(st_rules *R, rpattern *p, unsigned fold)
{
    if (!R->gctx) {
        R->gctx = pcre2_general_context_create(pcre_malloc, pcre_free, NULL);
        if (!R->gctx)
            return ST_ERR_NOMEM;
        R->cctx = pcre2_compile_context_create(R->gctx);
        if (!R->cctx)
            return ST_ERR_NOMEM;
    }
    if (R->ncodes == R->cap_codes) {
        uint32_t cap = R->cap_codes ? R->cap_codes * 2 : 16;
        pcre2_code **c = st_realloc(R->codes, cap * sizeof *c);
        if (!c)
            return ST_ERR_NOMEM;
        R->codes = c;
        R->cap_codes = cap;
    }
    uint32_t opts = PCRE2_UTF | PCRE2_UCP;
    if (p->caseless || (fold & FOLD_CASE))
        opts |= PCRE2_CASELESS;
    int err;
    PCRE2_SIZE off;
    p->re = pcre2_compile((PCRE2_SPTR)p->text, PCRE2_ZERO_TERMINATED, opts, &err, &off, R->cctx);
    if (!p->re) {
        if (err == PCRE2_ERROR_NOMEMORY || err == PCRE2_ERROR_HEAP_FAILED)
            return ST_ERR_NOMEM;
        PCRE2_UCHAR msg[256];
        pcre2_get_error_message(err, msg, sizeof msg);
        rspan at = regex_offset_span(R, p, off);
        st_rdiag(R, ST_SEV_ERROR, ST_ERR_RULE, &at,
                 "regular expression does not compile: %s (at offset %zu)", (const char *)msg,
                 (size_t)off);
        return ST_OK;
    }
    R->codes[R->ncodes++] = p->re;
    /* JIT where the platform has it; the interpreter is the fallback. */
    pcre2_jit_compile(p->re, PCRE2_JIT_COMPLETE);
    return ST_OK;
}

/* 1 if regex 're' matches the whole literal subject (lint only). */
static int regex_matches(const st_rules *R, pcre2_code *re, const char *subject, st_status *rc)
{
    pcre2_match_data *md = pcre2_match_data_create_from_pattern(re, R->gctx);
    if (!md) {
        *rc = ST_ERR_NOMEM;
        return 0;
    }
    pcre2_match_context *mc = pcre2_match_context_create(R->gctx);
    if (!mc) {
        pcre2_match_data_free(md);
        *rc = ST_ERR_NOMEM;
        return 0;
    }
    pcre2_set_match_limit(mc, ST_RULES_MATCH_LIMIT);
    pcre2_set_depth_limit(mc, ST_RULES_DEPTH_LIMIT);
    int r = pcre2_match(re, (PCRE2_SPTR)subject, strlen(subject), 0, 0, md, mc);
    pcre2_match_context_free(mc);
    pcre2_match_data_free(md);
    if (r == PCRE2_ERROR_NOMEMORY)
        *rc = ST_ERR_NOMEM;
    return r >= 0;
}

static st_status fold_key(st_rules *R, rpattern *p, unsigned fold)
{
    if (!fold) {
        p->key = p->text;
        return ST_OK;
    }
    st_buf b;
    st_buf_init(&b, 0);
    st_status rc = st_rtext_fold(p->text, strlen(p->text), fold, &b);
    if (rc == ST_OK) {
        p->key = st_arena_strndup(&R->arena, b.data ? b.data : "", b.len);
        if (!p->key)
            rc = ST_ERR_NOMEM;
    }
    st_buf_free(&b);
    return rc;
}

/* Warn about a literal an earlier line already takes. */
static st_status lint_literal(st_rules *R, rmap *m, uint32_t li, rpattern *p)
{
    st_status rc = ST_OK;
    int32_t first = keymap_find(&m->keys, p->key);
    if (first >= 0) {
        st_rdiag(R, ST_SEV_WARNING, ST_ERR_RULE, &p->span,
                 "unreachable: '%s' is already matched at line %u", p->text,
                 m->lines[first]->span.line);
        return ST_OK;
    }
    const char *subject = (m->fold & FOLD_ACCENTS) ? p->key : p->text;
    for (uint32_t k = 0; k < m->nregex_lines && m->regex_lines[k] < li; k++) {
        rmap_line *l = m->lines[m->regex_lines[k]];
        for (uint32_t j = 0; j < l->npats; j++) {
            if (!l->pats[j].is_regex || !l->pats[j].re)
                continue;
            if (regex_matches(R, l->pats[j].re, subject, &rc)) {
                st_rdiag(R, ST_SEV_WARNING, ST_ERR_RULE, &p->span,
                         "unreachable: '%s' is already matched by the regular expression at "
                         "line %u", p->text, l->span.line);
                return rc;
            }
            if (rc != ST_OK)
                return rc;
        }
    }
    return ST_OK;
}

static st_status check_map(st_rules *R, rmap *m)
{
    st_status rc = ST_OK;
    m->field = m->field_name[0] ? need_field(R, m->field_name, &m->field_span) : -1;
    m->source_ids = alloc(R, m->nsources * sizeof *m->source_ids, &rc);
    m->lines = alloc(R, m->nlines * sizeof *m->lines, &rc);
    m->regex_lines = alloc(R, m->nlines * sizeof *m->regex_lines, &rc);
    uint32_t npats = 0;
    for (rmap_line *l = m->lines_head; l; l = l->next)
        npats += l->npats;
    uint32_t cap = 8;
    while (cap < 2 * npats + 2)
        cap *= 2;
    m->keys.cap = cap;
    m->keys.keys = alloc(R, cap * sizeof *m->keys.keys, &rc);
    m->keys.line = alloc(R, cap * sizeof *m->keys.line, &rc);
    if (rc != ST_OK)
        return rc;
    uint32_t i = 0;
    for (rname *s = m->sources; s; s = s->next, i++) {
        m->source_ids[i] = intern_attr(R, s->text, &rc);
        if (rc != ST_OK)
            return rc;
    }
    if (m->field >= 0 && m->mixed)
        value_fits(R, (uint32_t)m->field, m->mixed, &m->mixed_span);
    if (m->field >= 0 && m->mixed && R->fields[m->field].kind != ST_KIND_CODE)
        st_rdiag(R, ST_SEV_ERROR, ST_ERR_RULE, &m->mixed_span,
                 "'mixed as' needs a field with codes");
    uint32_t li = 0;
    for (rmap_line *l = m->lines_head; l; l = l->next, li++) {
        m->lines[li] = l;
        if (m->field >= 0 && l->target)
            value_fits(R, (uint32_t)m->field, l->target, &l->target_span);
        int has_regex = 0;
        for (uint32_t k = 0; k < l->npats; k++) {
            rpattern *p = &l->pats[k];
            if (p->is_regex) {
                for (uint32_t e = 0; e < m->nregex_lines; e++) {
                    rmap_line *o = m->lines[m->regex_lines[e]];
                    for (uint32_t j = 0; j < o->npats; j++)
                        if (o->pats[j].is_regex && !strcmp(o->pats[j].text, p->text) &&
                            o->pats[j].caseless == p->caseless)
                            st_rdiag(R, ST_SEV_WARNING, ST_ERR_RULE, &p->span,
                                     "unreachable: the same regular expression is at line %u",
                                     o->span.line);
                }
                rc = compile_regex(R, p, m->fold);
                has_regex = 1;
            } else {
                rc = fold_key(R, p, m->fold);
                if (rc == ST_OK)
                    rc = lint_literal(R, m, li, p);
                if (rc == ST_OK && keymap_find(&m->keys, p->key) < 0)
                    keymap_put(&m->keys, p->key, li);
            }
            if (rc != ST_OK)
                return rc;
        }
        if (has_regex)
            m->regex_lines[m->nregex_lines++] = li;
    }
    return ST_OK;
}

/* ---- derive, check ------------------------------------------------------ */

static st_status check_derive(st_rules *R, rderive *d)
{
    st_status rc = ST_OK;
    d->field = d->field_name[0] ? need_field(R, d->field_name, &d->field_span) : -1;
    for (rderive_line *l = d->head; l; l = l->next) {
        if (l->when)
            check_condition(R, l->when, CTX_DERIVE, &rc);
        if (d->field < 0)
            continue;
        const st_schema_field *f = &R->fields[d->field];
        /* A bare code name gives that code. */
        if (f->kind == ST_KIND_CODE && l->value->kind == E_NAME &&
            find_field(R, l->value->text) < 0) {
            for (uint32_t i = 0; i < f->ncodes; i++)
                if (!strcmp(f->codes[i], l->value->text)) {
                    l->value->ref = REF_CODE;
                    l->value->index = d->field;
                }
            if (l->value->ref == REF_CODE)
                continue;
        }
        rtype t = check_expr(R, l->value, CTX_DERIVE, &rc);
        if (t == TY_ERR)
            continue;
        int wants_num = f->kind == ST_KIND_INTEGER || f->kind == ST_KIND_REAL;
        if ((wants_num && !numeric(t)) || (!wants_num && t != TY_TEXT && t != TY_ANY)) {
            st_rdiag(R, ST_SEV_ERROR, ST_ERR_RULE, &l->value->span,
                     "field '%s' is %s, but this gives %s", f->name, st_field_kind_name(f->kind),
                     type_name(t));
            continue;
        }
        if (l->value->kind == E_STR)
            value_fits(R, (uint32_t)d->field, l->value->text, &l->value->span);
    }
    return rc;
}

/* ---- defaults ------------------------------------------------------------- */

static void check_table_file(st_rules *R, rdefault *d, st_status *rc)
{
    const char *base = R->sources[d->span.src].name;
    const char *slash = strrchr(base, '/');
    const char *path = d->path[0] == '/' || !slash
                           ? d->path
                           : st_arena_printf(&R->arena, "%.*s/%s", (int)(slash - base), base,
                                             d->path);
    if (!path) {
        *rc = ST_ERR_NOMEM;
        return;
    }
    if (access(path, R_OK) != 0)
        st_rdiag(R, ST_SEV_ERROR, ST_ERR_IO, &d->span, "cannot read defaults table '%s'", path);
    R->tables[R->ntables].path = path;
    R->tables[R->ntables++].rule = d->rule;
}

static void check_choices(st_rules *R, rdefault *d, uint32_t fi, st_default_rule *out,
                          st_status *rc)
{
    st_default_choice *ch = alloc(R, d->nchoices * sizeof *ch, rc);
    if (!ch)
        return;
    double sum = 0;
    uint32_t with = 0, i = 0;
    for (rchoice *c = d->choices; c; c = c->next, i++) {
        value_fits(R, fi, c->value, &c->span);
        ch[i].value = c->value;
        ch[i].share = c->has_share ? c->percent / 100.0 : 1.0;
        with += c->has_share ? 1 : 0;
        sum += c->has_share ? c->percent : 0;
        for (rchoice *o = d->choices; o != c; o = o->next)
            if (!strcmp(o->value, c->value)) {
                st_rdiag(R, ST_SEV_ERROR, ST_ERR_RULE, &c->span, "'%s' is given twice",
                         c->value);
                break;
            }
    }
    rspan all = d->choices->span;
    for (rchoice *c = d->choices; c; c = c->next)
        if (c->span.line == all.line)
            all.len = c->span.off + c->span.len - all.off;
    if (with && with != d->nchoices)
        st_rdiag(R, ST_SEV_ERROR, ST_ERR_RULE, &all,
                 "give a share for every value, or a single value without one");
    else if (!with && d->nchoices > 1)
        st_rdiag(R, ST_SEV_ERROR, ST_ERR_RULE, &all,
                 "several values need shares that add up to 100%%");
    else if (with && fabs(sum - 100.0) > 1e-6)
        st_rdiag(R, ST_SEV_ERROR, ST_ERR_RULE, &all, "shares add up to %g%%, not 100%%", sum);
    out->choices = ch;
    out->nchoices = d->nchoices;
}

static st_status check_defaults(st_rules *R)
{
    st_status rc = ST_OK;
    size_t n[3] = {0, 0, 0};
    for (rdefault *d = R->defaults_head; d; d = d->next)
        n[d->kind]++;
    R->defaults = alloc(R, n[0] * sizeof *R->defaults, &rc);
    R->default_when = alloc(R, n[0] * sizeof *R->default_when, &rc);
    R->tables = alloc(R, n[1] * sizeof *R->tables, &rc);
    R->learns = alloc(R, n[2] * sizeof *R->learns, &rc);
    if (rc != ST_OK)
        return rc;
    for (rdefault *d = R->defaults_head; d && rc == ST_OK; d = d->next) {
        if (d->kind == 1) {
            check_table_file(R, d, &rc);
            continue;
        }
        int32_t fi = need_field(R, d->field_name, &d->field_span);
        if (d->kind == 2) {
            if (fi < 0)
                continue;
            st_default_learn *l = &R->learns[R->nlearns++];
            l->field = (uint32_t)fi;
            l->per = d->scope;
            l->min_count = d->min_count;
            l->rule = d->rule;
            continue;
        }
        if (d->when)
            check_condition(R, d->when, CTX_FIELDS, &rc);
        if (fi < 0)
            continue;
        st_default_rule *o = &R->defaults[R->ndefaults];
        o->scope = d->scope;
        o->pattern = d->pattern;
        o->when = d->when;
        o->field = (uint32_t)fi;
        o->rule = d->rule;
        check_choices(R, d, (uint32_t)fi, o, &rc);
        R->default_when[R->ndefaults++] = d->when;
    }
    return rc;
}

/* ---- gates ------------------------------------------------------------------ */

static st_status check_gates(st_rules *R)
{
    st_status rc = ST_OK;
    size_t n = 0;
    for (rgate *g = R->gates_head; g; g = g->next)
        n++;
    R->gates = alloc(R, n * sizeof *R->gates, &rc);
    if (rc != ST_OK)
        return rc;
    for (rgate *g = R->gates_head; g; g = g->next) {
        if (g->pub.metric == ST_METRIC_SHARE) {
            if (!strcmp(g->arg, "note"))
                g->pub.severity = ST_SEV_NOTE;
            else if (!strcmp(g->arg, "warning"))
                g->pub.severity = ST_SEV_WARNING;
            else if (!strcmp(g->arg, "error"))
                g->pub.severity = ST_SEV_ERROR;
            else {
                st_rdiag(R, ST_SEV_ERROR, ST_ERR_RULE, &g->arg_span,
                         "share() takes a severity: 'note', 'warning' or 'error'");
                continue;
            }
        } else if (g->pub.metric != ST_METRIC_DISTRICT_COMPLETENESS) {
            g->pub.field = need_field(R, g->arg, &g->arg_span);
            if (g->pub.field < 0)
                continue;
        }
        if (g->pub.metric != ST_METRIC_DISTRICT_COMPLETENESS &&
            (g->pub.threshold < 0 || g->pub.threshold > 1))
            st_rdiag(R, ST_SEV_ERROR, ST_ERR_RULE, &g->value_span,
                     "a share is between 0 and 1 (or 0%% and 100%%)");
        R->gates[R->ngates++] = g->pub;
    }
    return ST_OK;
}

/* ---- the set -------------------------------------------------------------- */

st_status st_rcheck_set(st_rules *R)
{
    st_status rc = check_schema(R);
    if (rc == ST_OK)
        rc = check_settings(R);
    uint32_t n = 0;
    for (rmap *m = R->maps_head; m; m = m->next)
        n++;
    R->maps = alloc(R, n * sizeof *R->maps, &rc);
    for (rmap *m = R->maps_head; m && rc == ST_OK; m = m->next) {
        R->maps[R->nmaps++] = m;
        rc = check_map(R, m);
    }
    n = 0;
    for (rderive *d = R->derives_head; d; d = d->next)
        n++;
    if (rc == ST_OK)
        R->derives = alloc(R, n * sizeof *R->derives, &rc);
    for (rderive *d = R->derives_head; d && rc == ST_OK; d = d->next) {
        R->derives[R->nderives++] = d;
        rc = check_derive(R, d);
    }
    n = 0;
    for (rcheck *c = R->checks_head; c; c = c->next)
        n++;
    if (rc == ST_OK)
        R->checks = alloc(R, n * sizeof *R->checks, &rc);
    for (rcheck *c = R->checks_head; c && rc == ST_OK; c = c->next) {
        R->checks[R->nchecks++] = c;
        check_condition(R, c->cond, CTX_FIELDS, &rc);
    }
    if (rc == ST_OK)
        rc = check_defaults(R);
    if (rc == ST_OK)
        rc = check_gates(R);
    return rc;
}
