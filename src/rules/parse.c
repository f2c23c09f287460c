/*
** rules/parse.c -- recursive-descent parser for the rule language.
**
** Input:   tokens from rules/lex.c, each with a byte span into a source
**          owned by the rule set.
** Output:  statement nodes appended to the rule set's lists, in file
**          order (an include is parsed where it stands); every node lives
**          in the set's arena and is never freed on its own.
** Errors:  each syntax error adds one diagnostic with its span, then the
**          parser skips to the next line (no longjmp); once a line has an
**          error, later errors on the same line are not reported. Parsing
**          stops after ST_RULES_MAX_ERRORS errors.
** Limits:  expressions nesting deeper than ST_RULES_MAX_DEPTH, more than
**          ST_RULES_MAX_RULES rule lines: an ST_ERR_LIMIT diagnostic.
**
** The grammar, in the EBNF of docs/rules.md, is quoted at the top of each
** parse function.
*/
#include <math.h>
#include <stdio.h>
#include <string.h>

#include "rulesInt.h"

typedef struct rparser {
    st_rules *R;
    rlexer lx;
    rtok tok;
    uint32_t src;
    int depth;              /* expression nesting */
    int incdepth;           /* include depth of this source */
    const char **chain;     /* include chain, for cycle messages */
    int nchain;
    st_status fatal;        /* ST_ERR_NOMEM or ST_ERR_LIMIT: stop */
    uint32_t err_line;      /* line that already has an error (0 = none) */
} rparser;

/* ---- helpers -------------------------------------------------------- */

static void advance(rparser *P);

static void describe(const rtok *t, char *out, size_t n)
{
    switch (t->type) {
    case T_NAME:
    case T_NUMBER:
        snprintf(out, n, "'%.*s'", (int)(t->tlen > 40 ? 40 : t->tlen), t->text);
        break;
    case T_STRING:
        snprintf(out, n, "string \"%.*s\"", (int)(t->tlen > 40 ? 40 : t->tlen), t->text);
        break;
    default:
        snprintf(out, n, "%s", st_rtok_name(t->type));
    }
}

/* Report an error at 'span' unless its line already has one. */
static int perr_at(rparser *P, const rspan *span, st_status code, const char *fmt, ...)
    ST_PRINTF(4, 5);
static int perr_at(rparser *P, const rspan *span, st_status code, const char *fmt, ...)
{
    if (P->err_line == span->line)
        return 0;
    P->err_line = span->line;
    char msg[1024];
    va_list ap;
    va_start(ap, fmt);
    vsnprintf(msg, sizeof msg, fmt, ap);
    va_end(ap);
    st_rdiag(P->R, ST_SEV_ERROR, code, span, "%s", msg);
    if (P->R->errors >= ST_RULES_MAX_ERRORS && !P->R->stopped) {
        P->R->stopped = 1;
        st_rdiag(P->R, ST_SEV_NOTE, ST_ERR_RULE, span,
                 "too many errors (%d); stopping here", ST_RULES_MAX_ERRORS);
    }
    return 0;
}

static int expected(rparser *P, const char *what)
{
    char found[96];
    describe(&P->tok, found, sizeof found);
    return perr_at(P, &P->tok.span, ST_ERR_RULE, "expected %s, found %s", what, found);
}

static void advance(rparser *P)
{
    if (P->fatal)
        return;
    st_status rc = st_rlex_next(&P->lx, &P->tok);
    if (rc != ST_OK) {
        P->fatal = rc;
        P->tok.type = T_EOF;
        return;
    }
    if (P->tok.type == T_ERROR) {
        perr_at(P, &P->tok.span, ST_ERR_RULE, "%s", P->tok.text);
        /* Recover at the next line. */
        while (P->tok.type != T_NL && P->tok.type != T_EOF && !P->fatal) {
            rc = st_rlex_next(&P->lx, &P->tok);
            if (rc != ST_OK) {
                P->fatal = rc;
                P->tok.type = T_EOF;
            }
        }
    }
}

static int is_kw(const rtok *t, const char *kw)
{
    size_t n = strlen(kw);
    return t->type == T_NAME && t->tlen == n && memcmp(t->text, kw, n) == 0;
}

static int accept(rparser *P, rtok_type type)
{
    if (P->tok.type != type)
        return 0;
    advance(P);
    return 1;
}

static int accept_kw(rparser *P, const char *kw)
{
    if (!is_kw(&P->tok, kw))
        return 0;
    advance(P);
    return 1;
}

static int expect(rparser *P, rtok_type type, const char *what)
{
    if (accept(P, type))
        return 1;
    return expected(P, what);
}

static int expect_kw(rparser *P, const char *kw)
{
    if (accept_kw(P, kw))
        return 1;
    char what[64];
    snprintf(what, sizeof what, "'%s'", kw);
    return expected(P, what);
}

/* Skip the rest of the line, including its newline. */
static void skip_line(rparser *P)
{
    while (P->tok.type != T_NL && P->tok.type != T_EOF && !P->fatal)
        advance(P);
    accept(P, T_NL);
}

/* The line must end here. */
static int expect_eol(rparser *P)
{
    if (P->tok.type == T_NL || P->tok.type == T_EOF) {
        accept(P, T_NL);
        return 1;
    }
    expected(P, "end of line");
    skip_line(P);
    return 0;
}

static const char *tok_text(rparser *P, const rtok *t)
{
    const char *s = st_arena_strndup(&P->R->arena, t->text, t->tlen);
    if (!s)
        P->fatal = ST_ERR_NOMEM;
    return s;
}

static void *node(rparser *P, size_t n)
{
    void *p = st_arena_alloc(&P->R->arena, n);
    if (!p)
        P->fatal = ST_ERR_NOMEM;
    return p;
}

static const char *rule_name(rparser *P, const rspan *span)
{
    const char *s = st_rrule_name(P->R, span);
    if (!s)
        P->fatal = ST_ERR_NOMEM;
    return s;
}

/* Count one more rule line; past the limit parsing stops. */
static int count_rule(rparser *P, const rspan *span)
{
    if (++P->R->nrules <= ST_RULES_MAX_RULES)
        return 1;
    perr_at(P, span, ST_ERR_LIMIT, "more than %d rule lines in the set", ST_RULES_MAX_RULES);
    P->R->stopped = 1;
    return 0;
}

static int stop(rparser *P)
{
    return P->fatal || P->R->stopped;
}

/* The span from 'a' to the end of 'b' (same line). */
static rspan join(const rspan *a, const rspan *b)
{
    rspan s = *a;
    if (b->line == a->line && b->off + b->len > a->off)
        s.len = b->off + b->len - a->off;
    return s;
}

static int is_block_kw(const rtok *t)
{
    static const char *const kws[] = {"schema", "footprint", "map", "derive", "check",
                                      "defaults", "gate", "include"};
    for (size_t i = 0; i < sizeof kws / sizeof *kws; i++)
        if (is_kw(t, kws[i]))
            return 1;
    return 0;
}

/* Look at the token after the current one without consuming it. */
static rtok_type peek(rparser *P)
{
    rlexer saved = P->lx;
    rtok t;
    rtok_type type = st_rlex_next(&P->lx, &t) == ST_OK ? t.type : T_EOF;
    P->lx = saved;
    return type;
}

/* 1 when the line starts a new block: the current one lacks its 'end'.
** In a map table "map" or "check" may be values to match, so there a
** block keyword counts only when no ',' or '->' follows it. */
static int starts_block(rparser *P, const char *name)
{
    if (!is_block_kw(&P->tok))
        return 0;
    if (strcmp(name, "map") != 0)
        return 1;
    rtok_type next = peek(P);
    return next != T_COMMA && next != T_ARROW;
}

/*
** The body of a block: lines until 'end'. 'line' parses one non-empty
** line (and consumes its newline, also after an error). A block keyword at
** the start of a line, or the end of the file, means 'end' is missing.
*/
typedef int (*line_fn)(rparser *P, void *block);

static void parse_body(rparser *P, const char *name, const rspan *open, line_fn line,
                       void *block)
{
    for (;;) {
        if (stop(P))
            return;
        if (accept(P, T_NL))
            continue;
        if (is_kw(&P->tok, "end")) {
            advance(P);
            expect_eol(P);
            return;
        }
        if (P->tok.type == T_EOF || starts_block(P, name)) {
            perr_at(P, &P->tok.span, ST_ERR_RULE,
                    "expected 'end' to close '%s' opened at %u:%u", name, open->line, open->col);
            return;
        }
        if (!count_rule(P, &P->tok.span))
            return;
        if (!line(P, block))
            skip_line(P);
    }
}

/* ---- values ---------------------------------------------------------- */

/* value = NAME | [ "-" ] NUMBER | STRING ; the text as written. */
static const char *parse_value(rparser *P, rspan *span, const char *what)
{
    rspan start = P->tok.span;
    if (P->tok.type == T_MINUS) {
        advance(P);
        if (P->tok.type != T_NUMBER || P->tok.span.off != start.off + 1) {
            expected(P, "a number after '-'");
            return NULL;
        }
        *span = join(&start, &P->tok.span);
        const char *s = st_arena_printf(&P->R->arena, "-%.*s", (int)P->tok.tlen, P->tok.text);
        if (!s)
            P->fatal = ST_ERR_NOMEM;
        advance(P);
        return s;
    }
    if (P->tok.type == T_NAME || P->tok.type == T_NUMBER || P->tok.type == T_STRING) {
        *span = P->tok.span;
        const char *s = tok_text(P, &P->tok);
        advance(P);
        return s;
    }
    expected(P, what);
    return NULL;
}

/* signed = [ "-" ] NUMBER ; */
static int parse_signed(rparser *P, double *out, rspan *span)
{
    int neg = 0;
    rspan start = P->tok.span;
    if (accept(P, T_MINUS))
        neg = 1;
    if (P->tok.type != T_NUMBER)
        return expected(P, "a number");
    *out = neg ? -P->tok.num : P->tok.num;
    if (span)
        *span = join(&start, &P->tok.span);
    advance(P);
    return 1;
}

static int parse_severity(rparser *P, st_severity *sev)
{
    if (accept_kw(P, "note"))
        *sev = ST_SEV_NOTE;
    else if (accept_kw(P, "warning"))
        *sev = ST_SEV_WARNING;
    else if (accept_kw(P, "error"))
        *sev = ST_SEV_ERROR;
    else if (P->tok.type == T_NAME) {
        char found[96];
        describe(&P->tok, found, sizeof found);
        const char *hint = "";
        if (is_kw(&P->tok, "warn"))
            hint = " (did you mean 'warning'?)";
        return perr_at(P, &P->tok.span, ST_ERR_RULE,
                       "expected a severity ('note', 'warning' or 'error'), found %s%s", found,
                       hint);
    } else
        return expected(P, "a severity ('note', 'warning' or 'error')");
    return 1;
}

/* ---- expressions: precedence climbing --------------------------------- */

static rexpr *parse_expr_prec(rparser *P, int min_prec);

static rexpr *new_expr(rparser *P, rexpr_kind kind, const rspan *span)
{
    rexpr *e = node(P, sizeof *e);
    if (e) {
        e->kind = kind;
        e->span = *span;
        e->index = -1;
    }
    return e;
}

/* Unit after a number in an expression: the factor to metres, square
** metres or a ratio; 0 when the name is not a unit. */
static double unit_factor(const rtok *t)
{
    if (is_kw(t, "m") || is_kw(t, "m2"))
        return 1.0;
    if (is_kw(t, "ft"))
        return 0.3048;
    if (is_kw(t, "ft2"))
        return 0.3048 * 0.3048;
    if (is_kw(t, "cm"))
        return 0.01;
    return 0.0;
}

/* primary = NUMBER [ unit | "%" ] | STRING | NAME [ "(" [ expr { "," expr } ] ")" ]
**         | "(" expr ")" ; */
static rexpr *parse_primary(rparser *P)
{
    rtok t = P->tok;
    if (t.type == T_NUMBER) {
        advance(P);
        rexpr *e = new_expr(P, E_NUM, &t.span);
        if (!e)
            return NULL;
        e->num = t.num;
        double f;
        if (P->tok.type == T_PERCENT) {
            e->num /= 100.0;
            e->span = join(&t.span, &P->tok.span);
            advance(P);
        } else if (P->tok.type == T_NAME && (f = unit_factor(&P->tok)) > 0) {
            e->num *= f;
            e->span = join(&t.span, &P->tok.span);
            advance(P);
        }
        return e;
    }
    if (t.type == T_STRING) {
        advance(P);
        rexpr *e = new_expr(P, E_STR, &t.span);
        if (e)
            e->text = t.text;
        return e;
    }
    if (t.type == T_NAME) {
        advance(P);
        if (P->tok.type == T_LPAREN && P->tok.span.off == t.span.off + t.span.len) {
            advance(P);
            rexpr *e = new_expr(P, E_CALL, &t.span);
            if (!e)
                return NULL;
            e->text = tok_text(P, &t);
            rexpr *args[8];
            uint32_t n = 0;
            if (P->tok.type != T_RPAREN) {
                do {
                    rexpr *a = parse_expr_prec(P, 0);
                    if (!a)
                        return NULL;
                    if (n == 8) {
                        perr_at(P, &a->span, ST_ERR_RULE, "a function takes at most 8 arguments");
                        return NULL;
                    }
                    args[n++] = a;
                } while (accept(P, T_COMMA));
            }
            rspan close = P->tok.span;
            if (!expect(P, T_RPAREN, "')' to close the arguments"))
                return NULL;
            e->span = join(&t.span, &close);
            e->nargs = n;
            e->args = node(P, (n ? n : 1) * sizeof *e->args);
            if (!e->args)
                return NULL;
            memcpy(e->args, args, n * sizeof *args);
            return e;
        }
        rexpr *e = new_expr(P, E_NAME, &t.span);
        if (e)
            e->text = tok_text(P, &t);
        return e;
    }
    if (t.type == T_LPAREN) {
        advance(P);
        rexpr *e = parse_expr_prec(P, 0);
        if (!e)
            return NULL;
        if (!expect(P, T_RPAREN, "')'"))
            return NULL;
        return e;
    }
    expected(P, "a value (a number, a name, a string or '(')");
    return NULL;
}

/* operand = "not" operand | "-" operand | primary [ "is" [ "not" ] "unknown" ] ; */
static rexpr *parse_operand(rparser *P)
{
    rtok t = P->tok;
    if (is_kw(&t, "not") || t.type == T_MINUS) {
        advance(P);
        if (++P->depth > ST_RULES_MAX_DEPTH) {
            perr_at(P, &t.span, ST_ERR_LIMIT, "expression nests deeper than the limit of %d",
                    ST_RULES_MAX_DEPTH);
            return NULL;
        }
        rexpr *a = parse_operand(P);
        P->depth--;
        if (!a)
            return NULL;
        rexpr *e = new_expr(P, t.type == T_MINUS ? E_NEG : E_NOT, &t.span);
        if (e) {
            e->a = a;
            e->span = join(&t.span, &a->span);
        }
        return e;
    }
    rexpr *p = parse_primary(P);
    if (!p || !is_kw(&P->tok, "is"))
        return p;
    advance(P);
    int neg = accept_kw(P, "not");
    rspan end = P->tok.span;
    if (!expect_kw(P, "unknown"))
        return NULL;
    rexpr *e = new_expr(P, E_IS_UNKNOWN, &p->span);
    if (e) {
        e->a = p;
        e->neg = neg;
        e->span = join(&p->span, &end);
    }
    return e;
}

/* Binary operators and their precedence (higher binds tighter). */
static int binop(const rtok *t, rop *op)
{
    switch (t->type) {
    case T_EQ: *op = OP_EQ; return 3;
    case T_NE: *op = OP_NE; return 3;
    case T_LT: *op = OP_LT; return 3;
    case T_LE: *op = OP_LE; return 3;
    case T_GT: *op = OP_GT; return 3;
    case T_GE: *op = OP_GE; return 3;
    case T_PLUS: *op = OP_ADD; return 4;
    case T_MINUS: *op = OP_SUB; return 4;
    case T_STAR: *op = OP_MUL; return 5;
    case T_SLASH: *op = OP_DIV; return 5;
    default: break;
    }
    if (is_kw(t, "or")) {
        *op = OP_OR;
        return 1;
    }
    if (is_kw(t, "and")) {
        *op = OP_AND;
        return 2;
    }
    return 0;
}

/* expr = operand { binop operand } ;  binop by precedence, lowest first:
**   "or" < "and" < "=" "!=" "<" "<=" ">" ">=" < "+" "-" < "*" "/"
** All binary operators associate to the left; comparisons do not chain. */
static rexpr *parse_expr_prec(rparser *P, int min_prec)
{
    if (++P->depth > ST_RULES_MAX_DEPTH) {
        perr_at(P, &P->tok.span, ST_ERR_LIMIT, "expression nests deeper than the limit of %d",
                ST_RULES_MAX_DEPTH);
        return NULL;
    }
    rexpr *left = parse_operand(P);
    rop op;
    int prec;
    while (left && (prec = binop(&P->tok, &op)) > min_prec) {
        rspan at = P->tok.span;
        rop this_op = op;
        advance(P);
        rexpr *right = parse_expr_prec(P, prec);
        if (!right) {
            left = NULL;
            break;
        }
        if (prec == 3 && binop(&P->tok, &op) == 3) {
            perr_at(P, &P->tok.span, ST_ERR_RULE,
                    "comparisons do not chain: join them with 'and'");
            left = NULL;
            break;
        }
        rexpr *e = new_expr(P, E_BIN, &at);
        if (!e) {
            left = NULL;
            break;
        }
        e->op = this_op;
        e->a = left;
        e->b = right;
        e->span = join(&left->span, &right->span);
        left = e;
    }
    P->depth--;
    return left;
}

static rexpr *parse_expr(rparser *P)
{
    P->depth = 0;
    return parse_expr_prec(P, 0);
}

/* ---- include ---------------------------------------------------------- */

/* include = "include" STRING ; */
static void parse_include(rparser *P)
{
    rspan kw = P->tok.span;
    advance(P);
    rtok t = P->tok;
    if (!expect(P, T_STRING, "a file name in double quotes")) {
        skip_line(P);
        return;
    }
    if (!expect_eol(P))
        return;
    rspan at = join(&kw, &t.span);
    st_status rc = st_rules_include(P->R, &at, t.text, P->incdepth + 1, P->chain, P->nchain);
    if (rc == ST_ERR_NOMEM)
        P->fatal = rc;
}

/* ---- schema ----------------------------------------------------------- */

/* range = signed ".." signed ; */
static int parse_range(rparser *P, st_schema_field *f)
{
    rspan a, b;
    if (!parse_signed(P, &f->min, &a))
        return 0;
    if (!expect(P, T_DOTDOT, "'..' between the lowest and highest value"))
        return 0;
    if (!parse_signed(P, &f->max, &b))
        return 0;
    if (f->min > f->max) {
        rspan s = join(&a, &b);
        return perr_at(P, &s, ST_ERR_RULE, "range goes from %g down to %g: write the lowest first",
                       f->min, f->max);
    }
    f->has_range = 1;
    return 1;
}

/* field = "field" NAME ( "codes" code { [ "," ] code } | "integer" [ range ]
**                      | "number" [ range ] | "text" ) ; */
static int parse_field(rparser *P, rfield *f)
{
    f->span = P->tok.span;
    advance(P);
    if (P->tok.type != T_NAME)
        return expected(P, "the field's name");
    f->pub.name = tok_text(P, &P->tok);
    f->span = join(&f->span, &P->tok.span);
    advance(P);
    f->pub.rule = rule_name(P, &f->span);
    if (accept_kw(P, "codes")) {
        f->pub.kind = ST_KIND_CODE;
        const char *codes[1024];
        rspan spans[1024];
        uint32_t n = 0;
        while (P->tok.type != T_NL && P->tok.type != T_EOF) {
            if (n && accept(P, T_COMMA))
                continue;
            if (n == 1024)
                return perr_at(P, &P->tok.span, ST_ERR_LIMIT,
                               "more than 1024 codes in one field");
            rspan s;
            const char *c = parse_value(P, &s, "a code");
            if (!c)
                return 0;
            codes[n] = c;
            spans[n++] = s;
        }
        if (!n)
            return expected(P, "at least one code");
        f->codes = node(P, n * sizeof *f->codes);
        f->code_spans = node(P, n * sizeof *f->code_spans);
        if (!f->codes || !f->code_spans)
            return 0;
        memcpy(f->codes, codes, n * sizeof *codes);
        memcpy(f->code_spans, spans, n * sizeof *spans);
        f->pub.codes = f->codes;
        f->pub.ncodes = n;
    } else if (accept_kw(P, "integer")) {
        f->pub.kind = ST_KIND_INTEGER;
        if ((P->tok.type == T_NUMBER || P->tok.type == T_MINUS) && !parse_range(P, &f->pub))
            return 0;
    } else if (accept_kw(P, "number")) {
        f->pub.kind = ST_KIND_REAL;
        if ((P->tok.type == T_NUMBER || P->tok.type == T_MINUS) && !parse_range(P, &f->pub))
            return 0;
    } else if (accept_kw(P, "text")) {
        f->pub.kind = ST_KIND_TEXT;
    } else {
        return expected(P, "the field's kind ('codes', 'integer', 'number' or 'text')");
    }
    return expect_eol(P);
}

/* unknown = "unknown" NAME value ; */
static int parse_unknown(rparser *P, runknown *u)
{
    u->span = P->tok.span;
    advance(P);
    if (P->tok.type != T_NAME)
        return expected(P, "a field name");
    u->field_name = tok_text(P, &P->tok);
    u->field_span = P->tok.span;
    advance(P);
    u->value = parse_value(P, &u->value_span, "the value that stands for unknown");
    if (!u->value)
        return 0;
    u->rule = rule_name(P, &u->span);
    return expect_eol(P);
}

/* schema-line = field | unknown ; */
static int schema_line(rparser *P, void *block)
{
    (void)block;
    st_rules *R = P->R;
    if (is_kw(&P->tok, "field")) {
        rfield *f = node(P, sizeof *f);
        if (!f || !parse_field(P, f))
            return 0;
        if (R->fields_tail)
            R->fields_tail->next = f;
        else
            R->fields_head = f;
        R->fields_tail = f;
        return 1;
    }
    if (is_kw(&P->tok, "unknown")) {
        runknown *u = node(P, sizeof *u);
        if (!u || !parse_unknown(P, u))
            return 0;
        if (R->unknown_tail)
            R->unknown_tail->next = u;
        else
            R->unknown_head = u;
        R->unknown_tail = u;
        return 1;
    }
    return expected(P, "'field', 'unknown' or 'end'");
}

/* schema = "schema" NL { [ schema-line ] NL } "end" ; */
static void parse_schema(rparser *P)
{
    rspan open = P->tok.span;
    advance(P);
    expect_eol(P);
    parse_body(P, "schema", &open, schema_line, NULL);
}

/* ---- footprint ------------------------------------------------------- */

static const char *setting_unit(const rtok *t, double *factor, const char **si)
{
    static const struct { const char *name; double f; const char *si; } units[] = {
        {"m", 1.0, "m"}, {"ft", 0.3048, "m"}, {"cm", 0.01, "m"},
        {"m2", 1.0, "m2"}, {"ft2", 0.09290304, "m2"}, {"ha", 10000.0, "m2"},
    };
    for (size_t i = 0; i < sizeof units / sizeof *units; i++)
        if (is_kw(t, units[i].name)) {
            *factor = units[i].f;
            *si = units[i].si;
            return units[i].name;
        }
    return NULL;
}

/* setting = NAME [ signed [ unit ] ] [ severity ] [ NAME ] ;
** unit = "m" | "cm" | "ft" | "m2" | "ft2" | "ha" | "%" ; */
static int footprint_line(rparser *P, void *block)
{
    (void)block;
    st_rules *R = P->R;
    if (P->tok.type != T_NAME)
        return expected(P, "a setting name or 'end'");
    rsetting *s = node(P, sizeof *s);
    if (!s)
        return 0;
    s->span = P->tok.span;
    s->pub.name = tok_text(P, &P->tok);
    s->pub.rule = rule_name(P, &s->span);
    s->pub.unit = "";
    s->pub.unit_si = "";
    advance(P);
    if (P->tok.type == T_NUMBER || P->tok.type == T_MINUS) {
        if (!parse_signed(P, &s->pub.number, NULL))
            return 0;
        s->pub.has_number = 1;
        s->pub.si = s->pub.number;
        double f;
        const char *si;
        const char *u;
        if (P->tok.type == T_PERCENT) {
            s->unit_span = P->tok.span;
            advance(P);
            s->pub.unit = "%";
            s->pub.unit_si = "ratio";
            s->pub.si = s->pub.number / 100.0;
        } else if (P->tok.type == T_NAME && (u = setting_unit(&P->tok, &f, &si))) {
            s->unit_span = P->tok.span;
            advance(P);
            s->pub.unit = u;
            s->pub.unit_si = si;
            s->pub.si = s->pub.number * f;
        }
    }
    if (is_kw(&P->tok, "note") || is_kw(&P->tok, "warning") || is_kw(&P->tok, "error")) {
        parse_severity(P, &s->pub.severity);
        s->pub.has_severity = 1;
    } else if (is_kw(&P->tok, "warn")) {
        return parse_severity(P, &s->pub.severity);
    }
    if (P->tok.type == T_NAME) {
        s->pub.word = tok_text(P, &P->tok);
        advance(P);
    }
    if (!s->pub.has_number && !s->pub.word)
        return perr_at(P, &s->span, ST_ERR_RULE,
                       "setting '%s' needs a number or a word", s->pub.name);
    if (!expect_eol(P))
        return 1;
    if (R->set_tail)
        R->set_tail->next = s;
    else
        R->set_head = s;
    R->set_tail = s;
    return 1;
}

/* footprint = "footprint" NL { [ setting ] NL } "end" ; */
static void parse_footprint(rparser *P)
{
    rspan open = P->tok.span;
    advance(P);
    expect_eol(P);
    parse_body(P, "footprint", &open, footprint_line, NULL);
}

/* ---- map --------------------------------------------------------------- */

/* map-line = match { "," match } "->" ( value | "nothing" ) ;
** match    = NAME | [ "-" ] NUMBER | STRING | REGEX ; */
static int map_line(rparser *P, void *block)
{
    rmap *m = block;
    rmap_line *l = node(P, sizeof *l);
    if (!l)
        return 0;
    l->span = P->tok.span;
    rpattern pats[256];
    uint32_t n = 0;
    do {
        if (n == 256)
            return perr_at(P, &P->tok.span, ST_ERR_LIMIT, "more than 256 values on one map line");
        rpattern *p = &pats[n];
        memset(p, 0, sizeof *p);
        if (P->tok.type == T_REGEX) {
            p->is_regex = 1;
            p->caseless = P->tok.caseless;
            p->text = P->tok.text;
            p->span = P->tok.span;
            advance(P);
        } else {
            p->text = parse_value(P, &p->span, "a value to match, or a /regular expression/");
            if (!p->text)
                return 0;
        }
        n++;
    } while (accept(P, T_COMMA));
    if (!expect(P, T_ARROW, "'->' and the value to give"))
        return 0;
    if (is_kw(&P->tok, "nothing")) {
        l->target = NULL;
        l->target_span = P->tok.span;
        advance(P);
    } else {
        l->target = parse_value(P, &l->target_span, "the value to give, or 'nothing'");
        if (!l->target)
            return 0;
    }
    l->span = join(&l->span, &l->target_span);
    l->rule = rule_name(P, &l->span);
    l->pats = node(P, n * sizeof *l->pats);
    if (!l->pats)
        return 0;
    memcpy(l->pats, pats, n * sizeof *pats);
    l->npats = n;
    if (!expect_eol(P))
        return 1;
    if (m->lines_tail)
        m->lines_tail->next = l;
    else
        m->lines_head = l;
    m->lines_tail = l;
    m->nlines++;
    return 1;
}

/* option = "ignoring" fold [ "and" fold ] | "mixed" "as" value ;
** fold   = "case" | "accents" ; */
static int map_option(rparser *P, rmap *m)
{
    if (accept_kw(P, "ignoring")) {
        do {
            if (accept_kw(P, "case"))
                m->fold |= FOLD_CASE;
            else if (accept_kw(P, "accents"))
                m->fold |= FOLD_ACCENTS;
            else
                return expected(P, "'case' or 'accents' after 'ignoring'");
        } while (accept_kw(P, "and"));
        return 1;
    }
    if (accept_kw(P, "mixed")) {
        if (!expect_kw(P, "as"))
            return 0;
        m->mixed = parse_value(P, &m->mixed_span, "the value for mixed parts");
        return m->mixed != NULL;
    }
    return expected(P, "',', 'ignoring', 'mixed' or end of line");
}

/* map = "map" NAME "from" source { "," source } { option } NL
**       { [ map-line ] NL } "end" ;
** source = NAME | STRING ; */
static void parse_map(rparser *P)
{
    st_rules *R = P->R;
    rmap *m = node(P, sizeof *m);
    if (!m)
        return;
    m->span = P->tok.span;
    m->field = -1;
    advance(P);
    int ok = 0;
    if (P->tok.type != T_NAME) {
        expected(P, "the name of the schema field to fill");
    } else {
        m->field_name = tok_text(P, &P->tok);
        m->field_span = P->tok.span;
        advance(P);
        if (expect_kw(P, "from")) {
            rname **tail = &m->sources;
            ok = 1;
            do {
                if (P->tok.type != T_NAME && P->tok.type != T_STRING) {
                    ok = expected(P, "a source attribute name");
                    break;
                }
                rname *s = node(P, sizeof *s);
                if (!s)
                    return;
                s->text = tok_text(P, &P->tok);
                s->span = P->tok.span;
                s->index = -1;
                *tail = s;
                tail = &s->next;
                m->nsources++;
                advance(P);
            } while (accept(P, T_COMMA));
            while (ok && P->tok.type != T_NL && P->tok.type != T_EOF)
                ok = map_option(P, m);
        }
    }
    if (ok)
        expect_eol(P);
    else
        skip_line(P);
    if (!m->field_name)
        m->field_name = "";
    m->rule = rule_name(P, &m->span);
    parse_body(P, "map", &m->span, map_line, m);
    if (R->maps_tail)
        R->maps_tail->next = m;
    else
        R->maps_head = m;
    R->maps_tail = m;
}

/* ---- derive ---------------------------------------------------------- */

/* derive-line = "from" expr [ "when" expr ] [ "accepting" accept { "," accept } ] ;
** accept      = "words" | "ground-plus" ; */
static int derive_line(rparser *P, void *block)
{
    rderive *d = block;
    rderive_line *l = node(P, sizeof *l);
    if (!l)
        return 0;
    l->span = P->tok.span;
    if (!expect_kw(P, "from"))
        return 0;
    l->value = parse_expr(P);
    if (!l->value)
        return 0;
    if (accept_kw(P, "when")) {
        l->when = parse_expr(P);
        if (!l->when)
            return 0;
    }
    if (accept_kw(P, "accepting")) {
        do {
            if (accept_kw(P, "words"))
                l->accept |= ACCEPT_WORDS;
            else if (accept_kw(P, "ground-plus"))
                l->accept |= ACCEPT_GROUND_PLUS;
            else
                return expected(P, "'words' or 'ground-plus'");
        } while (accept(P, T_COMMA));
    }
    l->rule = rule_name(P, &l->span);
    if (!expect_eol(P))
        return 1;
    if (d->tail)
        d->tail->next = l;
    else
        d->head = l;
    d->tail = l;
    return 1;
}

/* derive = "derive" NAME NL { [ derive-line ] NL } "end" ; */
static void parse_derive(rparser *P)
{
    st_rules *R = P->R;
    rderive *d = node(P, sizeof *d);
    if (!d)
        return;
    d->span = P->tok.span;
    d->field = -1;
    d->field_name = "";
    advance(P);
    if (P->tok.type != T_NAME) {
        expected(P, "the name of the schema field to derive");
        skip_line(P);
    } else {
        d->field_name = tok_text(P, &P->tok);
        d->field_span = P->tok.span;
        advance(P);
        expect_eol(P);
    }
    parse_body(P, "derive", &d->span, derive_line, d);
    if (R->derives_tail)
        R->derives_tail->next = d;
    else
        R->derives_head = d;
    R->derives_tail = d;
}

/* ---- check ----------------------------------------------------------- */

/* check-line = expr "->" severity STRING ; */
static int check_line(rparser *P, void *block)
{
    (void)block;
    st_rules *R = P->R;
    rcheck *c = node(P, sizeof *c);
    if (!c)
        return 0;
    c->span = P->tok.span;
    c->cond = parse_expr(P);
    if (!c->cond)
        return 0;
    if (!expect(P, T_ARROW, "'->' and a severity"))
        return 0;
    if (!parse_severity(P, &c->severity))
        return 0;
    if (P->tok.type != T_STRING)
        return expected(P, "the message in double quotes");
    c->message = P->tok.text;
    advance(P);
    c->rule = rule_name(P, &c->span);
    if (!expect_eol(P))
        return 1;
    if (R->checks_tail)
        R->checks_tail->next = c;
    else
        R->checks_head = c;
    R->checks_tail = c;
    return 1;
}

/* check = "check" NL { [ check-line ] NL } "end" ; */
static void parse_check(rparser *P)
{
    rspan open = P->tok.span;
    advance(P);
    expect_eol(P);
    parse_body(P, "check", &open, check_line, NULL);
}

/* ---- defaults -------------------------------------------------------- */

/* pattern = STRING | a run of tokens with no space between them ("OLD-*"). */
static const char *parse_pattern(rparser *P)
{
    if (P->tok.type == T_STRING) {
        const char *s = P->tok.text;
        advance(P);
        return s;
    }
    if (P->tok.type == T_NL || P->tok.type == T_EOF) {
        expected(P, "a district or region name or pattern");
        return NULL;
    }
    rspan first = P->tok.span;
    rspan last = first;
    advance(P);
    while (P->tok.type != T_NL && P->tok.type != T_EOF &&
           P->tok.span.off == last.off + last.len) {
        last = P->tok.span;
        advance(P);
    }
    const char *text = P->R->sources[first.src].text + first.off;
    const char *s = st_arena_strndup(&P->R->arena, text, last.off + last.len - first.off);
    if (!s)
        P->fatal = ST_ERR_NOMEM;
    return s;
}

/* choice = value [ NUMBER "%" ] ; */
static int parse_choices(rparser *P, rdefault *d)
{
    rchoice **tail = &d->choices;
    do {
        rchoice *c = node(P, sizeof *c);
        if (!c)
            return 0;
        c->value = parse_value(P, &c->span, "a value");
        if (!c->value)
            return 0;
        if (P->tok.type == T_NUMBER) {
            c->has_share = 1;
            c->percent = P->tok.num;
            c->span = join(&c->span, &P->tok.span);
            advance(P);
            rspan pct = P->tok.span;
            if (!expect(P, T_PERCENT, "'%' after the share"))
                return 0;
            c->span = join(&c->span, &pct);
        }
        *tail = c;
        tail = &c->next;
        d->nchoices++;
    } while (accept(P, T_COMMA));
    return 1;
}

/* default-line = scope [ "when" expr ] "set" NAME choice { "," choice }
**              | "table" STRING
**              | "learn" NAME "per" ( "district" | "region" ) [ "from" NUMBER ] ;
** scope        = "in" ( "district" | "region" ) pattern | "everywhere" ; */
static int defaults_line(rparser *P, void *block)
{
    (void)block;
    st_rules *R = P->R;
    rdefault *d = node(P, sizeof *d);
    if (!d)
        return 0;
    d->span = P->tok.span;
    if (accept_kw(P, "table")) {
        d->kind = 1;
        if (P->tok.type != T_STRING)
            return expected(P, "a CSV file name in double quotes");
        d->path = P->tok.text;
        d->span = join(&d->span, &P->tok.span);
        advance(P);
    } else if (accept_kw(P, "learn")) {
        d->kind = 2;
        if (P->tok.type != T_NAME)
            return expected(P, "a field name");
        d->field_name = tok_text(P, &P->tok);
        d->field_span = P->tok.span;
        advance(P);
        if (!expect_kw(P, "per"))
            return 0;
        if (accept_kw(P, "district"))
            d->scope = ST_SCOPE_DISTRICT;
        else if (accept_kw(P, "region"))
            d->scope = ST_SCOPE_REGION;
        else
            return expected(P, "'district' or 'region'");
        d->min_count = 1;
        if (accept_kw(P, "from")) {
            if (P->tok.type != T_NUMBER || P->tok.num < 1 || P->tok.num > 1e9 ||
                P->tok.num != floor(P->tok.num))
                return expected(P, "a whole number of buildings");
            d->min_count = (uint32_t)P->tok.num;
            advance(P);
            if (!expect_kw(P, "buildings"))
                return 0;
        }
    } else {
        if (accept_kw(P, "everywhere")) {
            d->scope = ST_SCOPE_EVERYWHERE;
        } else if (accept_kw(P, "in")) {
            if (accept_kw(P, "district"))
                d->scope = ST_SCOPE_DISTRICT;
            else if (accept_kw(P, "region"))
                d->scope = ST_SCOPE_REGION;
            else
                return expected(P, "'district' or 'region'");
            d->pattern = parse_pattern(P);
            if (!d->pattern)
                return 0;
        } else {
            return expected(P, "'in', 'everywhere', 'table', 'learn' or 'end'");
        }
        if (accept_kw(P, "when")) {
            d->when = parse_expr(P);
            if (!d->when)
                return 0;
        }
        if (!expect_kw(P, "set"))
            return 0;
        if (P->tok.type != T_NAME)
            return expected(P, "a field name");
        d->field_name = tok_text(P, &P->tok);
        d->field_span = P->tok.span;
        advance(P);
        if (!parse_choices(P, d))
            return 0;
    }
    d->rule = rule_name(P, &d->span);
    if (!expect_eol(P))
        return 1;
    if (R->defaults_tail)
        R->defaults_tail->next = d;
    else
        R->defaults_head = d;
    R->defaults_tail = d;
    return 1;
}

/* defaults = "defaults" NL { [ default-line ] NL } "end" ; */
static void parse_defaults(rparser *P)
{
    rspan open = P->tok.span;
    advance(P);
    expect_eol(P);
    parse_body(P, "defaults", &open, defaults_line, NULL);
}

/* ---- gate ------------------------------------------------------------ */

/* gate-line = ( "fail" | "warn" ) "when" metric compare signed [ "%" ] ;
** metric    = ( "share" | "completeness" | "observed" ) "(" NAME ")"
**           | "district-completeness" ;
** compare   = "=" | "!=" | "<" | "<=" | ">" | ">=" ; */
static int gate_line(rparser *P, void *block)
{
    (void)block;
    st_rules *R = P->R;
    rgate *g = node(P, sizeof *g);
    if (!g)
        return 0;
    g->span = P->tok.span;
    g->pub.field = -1;
    if (accept_kw(P, "fail"))
        g->pub.action = ST_GATE_FAIL;
    else if (accept_kw(P, "warn"))
        g->pub.action = ST_GATE_WARN;
    else
        return expected(P, "'fail', 'warn' or 'end'");
    if (!expect_kw(P, "when"))
        return 0;
    rspan cond = P->tok.span;
    if (accept_kw(P, "district-completeness")) {
        g->pub.metric = ST_METRIC_DISTRICT_COMPLETENESS;
    } else {
        if (accept_kw(P, "share"))
            g->pub.metric = ST_METRIC_SHARE;
        else if (accept_kw(P, "completeness"))
            g->pub.metric = ST_METRIC_COMPLETENESS;
        else if (accept_kw(P, "observed"))
            g->pub.metric = ST_METRIC_OBSERVED;
        else
            return expected(P, "'share(...)', 'completeness(...)', 'observed(...)' "
                               "or 'district-completeness'");
        if (!expect(P, T_LPAREN, "'('"))
            return 0;
        if (P->tok.type != T_NAME)
            return expected(P, g->pub.metric == ST_METRIC_SHARE ? "a severity" : "a field name");
        g->arg = tok_text(P, &P->tok);
        g->arg_span = P->tok.span;
        advance(P);
        if (!expect(P, T_RPAREN, "')'"))
            return 0;
    }
    static const rtok_type ops[] = {T_EQ, T_NE, T_LT, T_LE, T_GT, T_GE};
    int found = 0;
    for (int i = 0; i < 6; i++)
        if (P->tok.type == ops[i]) {
            g->pub.cmp = (st_cmp)i;
            found = 1;
        }
    if (!found)
        return expected(P, "a comparison ('<', '<=', '>', '>=', '=' or '!=')");
    advance(P);
    rspan num;
    if (!parse_signed(P, &g->pub.threshold, &num))
        return 0;
    rspan end = num;
    g->value_span = num;
    if (P->tok.type == T_PERCENT) {
        g->value_span = join(&num, &P->tok.span);
        end = P->tok.span;
        g->pub.threshold /= 100.0;
        advance(P);
    }
    cond = join(&cond, &end);
    g->pub.text = st_arena_strndup(&R->arena, R->sources[cond.src].text + cond.off, cond.len);
    g->pub.rule = rule_name(P, &g->span);
    if (!g->pub.text) {
        P->fatal = ST_ERR_NOMEM;
        return 0;
    }
    if (!expect_eol(P))
        return 1;
    if (R->gates_tail)
        R->gates_tail->next = g;
    else
        R->gates_head = g;
    R->gates_tail = g;
    return 1;
}

/* gate = "gate" NL { [ gate-line ] NL } "end" ; */
static void parse_gate(rparser *P)
{
    rspan open = P->tok.span;
    advance(P);
    expect_eol(P);
    parse_body(P, "gate", &open, gate_line, NULL);
}

/* ---- file ------------------------------------------------------------ */

static const char *const statements[] = {"include", "schema", "footprint", "map",
                                         "derive", "check", "defaults", "gate"};

/* statement = include | schema | footprint | map | derive | check
**           | defaults | gate ; */
static void parse_statement(rparser *P)
{
    if (is_kw(&P->tok, "include"))
        parse_include(P);
    else if (is_kw(&P->tok, "schema"))
        parse_schema(P);
    else if (is_kw(&P->tok, "footprint"))
        parse_footprint(P);
    else if (is_kw(&P->tok, "map"))
        parse_map(P);
    else if (is_kw(&P->tok, "derive"))
        parse_derive(P);
    else if (is_kw(&P->tok, "check"))
        parse_check(P);
    else if (is_kw(&P->tok, "defaults"))
        parse_defaults(P);
    else if (is_kw(&P->tok, "gate"))
        parse_gate(P);
    else {
        char found[96];
        describe(&P->tok, found, sizeof found);
        const char *best = NULL;
        if (P->tok.type == T_NAME && P->tok.tlen < 40) {
            char word[48];
            memcpy(word, P->tok.text, P->tok.tlen);
            word[P->tok.tlen] = '\0';
            size_t bestd = 3;
            for (size_t i = 0; i < sizeof statements / sizeof *statements; i++) {
                size_t d = st_rtext_distance(word, statements[i], 2);
                if (d < bestd) {
                    bestd = d;
                    best = statements[i];
                }
            }
        }
        if (best) {
            perr_at(P, &P->tok.span, ST_ERR_RULE,
                    "expected a statement, found %s (did you mean '%s'?)", found, best);
            /* A misspelt block keyword: skip its body rather than report
            ** every line of it. */
            if (strcmp(best, "include") != 0) {
                skip_line(P);
                while (!stop(P) && P->tok.type != T_EOF && !is_kw(&P->tok, "end"))
                    skip_line(P);
            }
        }
        else if (is_kw(&P->tok, "end"))
            perr_at(P, &P->tok.span, ST_ERR_RULE, "'end' without a block to close");
        else
            perr_at(P, &P->tok.span, ST_ERR_RULE,
                    "expected a statement (include, schema, footprint, map, derive, check, "
                    "defaults or gate), found %s", found);
        skip_line(P);
    }
}

/* file = { [ statement ] NL } EOF ; */
st_status st_rparse_source(st_rules *R, uint32_t src, int depth, const char **chain, int nchain)
{
    rparser P;
    memset(&P, 0, sizeof P);
    P.R = R;
    P.src = src;
    P.incdepth = depth;
    P.chain = chain;
    P.nchain = nchain;
    st_rlex_init(&P.lx, R, src);
    advance(&P);
    while (!stop(&P) && P.tok.type != T_EOF) {
        if (accept(&P, T_NL))
            continue;
        P.err_line = 0;
        parse_statement(&P);
    }
    return P.fatal;
}
