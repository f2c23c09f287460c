/*
** rules/lex.c -- the lexer of the rule language, over a character-class
** table.
**
** Input:   one source text owned by the rule set.
** Output:  tokens pulled one at a time by the parser, each with its byte
**          span, line and column; newlines are tokens (one statement a
**          line); '#' comments are skipped. A '/' starts a regular
**          expression where an operand is expected (after a newline, a
**          comma, '->' or an operator) and means division after an operand.
** Errors:  an ERROR token carrying its message (unterminated string or
**          regex, a stray character, a token longer than the limit).
** Limits:  ST_RULES_MAX_TOKEN bytes per token.
*/
#include <stdlib.h>
#include <string.h>

#include "rulesInt.h"

/* Character classes: space, newline, digit, name letter (ASCII letters,
** '_' and every byte of a multi-byte UTF-8 character), ':', '"', '#',
** other punctuation, control bytes. */
enum { CX, CS, CN, CD, CA, CC, CQ, CH, CP };

static const unsigned char cclass[256] = {
    CX, CX, CX, CX, CX, CX, CX, CX, CX, CS, CN, CS, CS, CS, CX, CX,
    CX, CX, CX, CX, CX, CX, CX, CX, CX, CX, CX, CX, CX, CX, CX, CX,
    CS, CP, CQ, CH, CP, CP, CP, CP, CP, CP, CP, CP, CP, CP, CP, CP,
    CD, CD, CD, CD, CD, CD, CD, CD, CD, CD, CC, CP, CP, CP, CP, CP,
    CP, CA, CA, CA, CA, CA, CA, CA, CA, CA, CA, CA, CA, CA, CA, CA,
    CA, CA, CA, CA, CA, CA, CA, CA, CA, CA, CA, CP, CP, CP, CP, CA,
    CP, CA, CA, CA, CA, CA, CA, CA, CA, CA, CA, CA, CA, CA, CA, CA,
    CA, CA, CA, CA, CA, CA, CA, CA, CA, CA, CA, CP, CP, CP, CP, CX,
    CA, CA, CA, CA, CA, CA, CA, CA, CA, CA, CA, CA, CA, CA, CA, CA,
    CA, CA, CA, CA, CA, CA, CA, CA, CA, CA, CA, CA, CA, CA, CA, CA,
    CA, CA, CA, CA, CA, CA, CA, CA, CA, CA, CA, CA, CA, CA, CA, CA,
    CA, CA, CA, CA, CA, CA, CA, CA, CA, CA, CA, CA, CA, CA, CA, CA,
    CA, CA, CA, CA, CA, CA, CA, CA, CA, CA, CA, CA, CA, CA, CA, CA,
    CA, CA, CA, CA, CA, CA, CA, CA, CA, CA, CA, CA, CA, CA, CA, CA,
    CA, CA, CA, CA, CA, CA, CA, CA, CA, CA, CA, CA, CA, CA, CA, CA,
    CA, CA, CA, CA, CA, CA, CA, CA, CA, CA, CA, CA, CA, CA, CA, CA,
};

#define CLS(c) (cclass[(unsigned char)(c)])

static const char *const tok_names[] = {
    "end of file", "end of line", "name", "number", "string", "regular expression",
    "'->'", "'='", "'!='", "'<'", "'<='", "'>'", "'>='",
    "'+'", "'-'", "'*'", "'/'", "'('", "')'",
    "','", "'..'", "'%'", "'?'", "error",
};

const char *st_rtok_name(rtok_type t)
{
    return (unsigned)t < sizeof tok_names / sizeof *tok_names ? tok_names[t] : "token";
}

void st_rlex_init(rlexer *lx, struct st_rules *R, uint32_t src)
{
    memset(lx, 0, sizeof *lx);
    lx->R = R;
    lx->src = src;
    lx->start = R->sources[src].text;
    lx->p = lx->start;
    lx->end = lx->start + R->sources[src].len;
    lx->line = 1;
    lx->line_start = lx->start;
    lx->prev = T_NL;
}

/* 1 when the previous token ends an operand, so '/' divides. */
static int after_operand(rtok_type prev)
{
    return prev == T_NAME || prev == T_NUMBER || prev == T_STRING ||
           prev == T_RPAREN || prev == T_PERCENT || prev == T_REGEX;
}

static void set_span(rlexer *lx, rtok *t, const char *from)
{
    t->span.src = lx->src;
    t->span.off = (uint32_t)(from - lx->start);
    t->span.len = (uint32_t)(lx->p - from);
    t->span.line = lx->line;
    t->span.col = (uint32_t)(from - lx->line_start) + 1;
}

static st_status lex_error(rlexer *lx, rtok *t, const char *from, const char *msg)
{
    t->type = T_ERROR;
    set_span(lx, t, from);
    if (t->span.len == 0)
        t->span.len = 1;
    t->text = msg;
    t->tlen = strlen(msg);
    return ST_OK;
}

static int name_continues(const char *p, const char *end)
{
    int c = CLS(*p);
    if (c == CA || c == CD || c == CC)
        return 1;
    /* A hyphen joins two name parts ("min-area", "OLD-TOWN"): write spaces
    ** around a minus sign in arithmetic. */
    return *p == '-' && p + 1 < end && (CLS(p[1]) == CA || CLS(p[1]) == CD);
}

static st_status lex_name(rlexer *lx, rtok *t, const char *from)
{
    while (lx->p < lx->end && name_continues(lx->p, lx->end))
        lx->p++;
    t->type = T_NAME;
    set_span(lx, t, from);
    t->text = from;
    t->tlen = (size_t)(lx->p - from);
    if (t->tlen > ST_RULES_MAX_TOKEN)
        return lex_error(lx, t, from, "name is longer than the limit of 4096 bytes");
    return ST_OK;
}

static st_status lex_number(rlexer *lx, rtok *t, const char *from)
{
    while (lx->p < lx->end && CLS(*lx->p) == CD)
        lx->p++;
    /* A fraction, but not the '..' of a range. */
    if (lx->p + 1 < lx->end && lx->p[0] == '.' && CLS(lx->p[1]) == CD) {
        lx->p++;
        while (lx->p < lx->end && CLS(*lx->p) == CD)
            lx->p++;
    }
    t->type = T_NUMBER;
    set_span(lx, t, from);
    t->text = from;
    t->tlen = (size_t)(lx->p - from);
    if (t->tlen > 64)
        return lex_error(lx, t, from, "number is too long");
    char tmp[72];
    memcpy(tmp, from, t->tlen);
    tmp[t->tlen] = '\0';
    t->num = strtod(tmp, NULL);
    return ST_OK;
}

/* "text" with \" \\ \n \t escapes; no line breaks inside. */
static st_status lex_string(rlexer *lx, rtok *t, const char *from)
{
    st_buf b;
    st_buf_init(&b, ST_RULES_MAX_TOKEN);
    lx->p++;
    for (;;) {
        if (lx->p >= lx->end || *lx->p == '\n') {
            st_buf_free(&b);
            return lex_error(lx, t, from, "string is not closed before the end of the line");
        }
        char c = *lx->p++;
        if (c == '"')
            break;
        if (c == '\\' && lx->p < lx->end && *lx->p != '\n') {
            char e = *lx->p++;
            c = e == 'n' ? '\n' : e == 't' ? '\t' : e;
        }
        st_status rc = st_buf_append(&b, &c, 1);
        if (rc == ST_ERR_LIMIT) {
            st_buf_free(&b);
            while (lx->p < lx->end && *lx->p != '\n' && *lx->p != '"')
                lx->p++;
            if (lx->p < lx->end && *lx->p == '"')
                lx->p++;
            return lex_error(lx, t, from, "string is longer than the limit of 4096 bytes");
        }
        if (rc != ST_OK) {
            st_buf_free(&b);
            return rc;
        }
    }
    t->type = T_STRING;
    set_span(lx, t, from);
    t->text = st_arena_strndup(&lx->R->arena, b.data ? b.data : "", b.len);
    t->tlen = b.len;
    st_buf_free(&b);
    return t->text ? ST_OK : ST_ERR_NOMEM;
}

/* /pattern/flags: the pattern goes to PCRE2 as written except that "\/"
** becomes "/". The only flag is 'i' (ignore case). */
static st_status lex_regex(rlexer *lx, rtok *t, const char *from)
{
    st_buf b;
    st_buf_init(&b, ST_RULES_MAX_TOKEN);
    lx->p++;
    st_status rc = ST_OK;
    for (;;) {
        if (lx->p >= lx->end || *lx->p == '\n') {
            st_buf_free(&b);
            return lex_error(lx, t, from,
                             "regular expression is not closed with '/' before the end of the line");
        }
        char c = *lx->p++;
        if (c == '/')
            break;
        if (c == '\\' && lx->p < lx->end && *lx->p == '/') {
            rc = st_buf_append(&b, "/", 1);
            lx->p++;
        } else if (c == '\\' && lx->p < lx->end && *lx->p != '\n') {
            rc = st_buf_append(&b, lx->p - 1, 2);
            lx->p++;
        } else {
            rc = st_buf_append(&b, &c, 1);
        }
        if (rc != ST_OK) {
            st_buf_free(&b);
            if (rc == ST_ERR_LIMIT)
                return lex_error(lx, t, from,
                                 "regular expression is longer than the limit of 4096 bytes");
            return rc;
        }
    }
    t->caseless = 0;
    while (lx->p < lx->end && CLS(*lx->p) == CA) {
        if (*lx->p != 'i') {
            st_buf_free(&b);
            const char *bad = lx->p++;
            set_span(lx, t, bad);
            t->type = T_ERROR;
            t->text = "unknown regular expression flag (only 'i', ignore case, is known)";
            t->tlen = strlen(t->text);
            return ST_OK;
        }
        t->caseless = 1;
        lx->p++;
    }
    t->type = T_REGEX;
    set_span(lx, t, from);
    t->text = st_arena_strndup(&lx->R->arena, b.data ? b.data : "", b.len);
    t->tlen = b.len;
    st_buf_free(&b);
    return t->text ? ST_OK : ST_ERR_NOMEM;
}

static st_status lex_punct(rlexer *lx, rtok *t, const char *from)
{
    char c = *lx->p++;
    char n = lx->p < lx->end ? *lx->p : '\0';
    rtok_type type;
    switch (c) {
    case '-': type = n == '>' ? T_ARROW : T_MINUS; break;
    case '=': type = T_EQ; break;
    case '!':
        if (n != '=')
            return lex_error(lx, t, from, "unexpected '!' (write '!=' for 'is not equal')");
        type = T_NE;
        break;
    case '<': type = n == '=' ? T_LE : T_LT; break;
    case '>': type = n == '=' ? T_GE : T_GT; break;
    case '+': type = T_PLUS; break;
    case '*': type = T_STAR; break;
    case '/': type = T_SLASH; break;
    case '(': type = T_LPAREN; break;
    case ')': type = T_RPAREN; break;
    case ',': type = T_COMMA; break;
    case '%': type = T_PERCENT; break;
    case '?': type = T_QUESTION; break;
    case '.':
        if (n != '.')
            return lex_error(lx, t, from, "unexpected '.'");
        type = T_DOTDOT;
        break;
    default:
        return lex_error(lx, t, from, "unexpected character");
    }
    if (type == T_ARROW || type == T_NE || type == T_LE || type == T_GE || type == T_DOTDOT)
        lx->p++;
    t->type = type;
    set_span(lx, t, from);
    t->text = from;
    t->tlen = t->span.len;
    return ST_OK;
}

static st_status lex_one(rlexer *lx, rtok *t)
{
    for (;;) {
        while (lx->p < lx->end && CLS(*lx->p) == CS)
            lx->p++;
        if (lx->p < lx->end && *lx->p == '#') {
            while (lx->p < lx->end && *lx->p != '\n')
                lx->p++;
            continue;
        }
        break;
    }
    const char *from = lx->p;
    if (lx->p >= lx->end) {
        t->type = T_EOF;
        set_span(lx, t, from);
        /* Point after the last line's text rather than at the empty line a
        ** final newline opens, so a caret has a line to stand under. */
        if (lx->line > 1 && from == lx->line_start) {
            const char *prev = from - 1;
            const char *ls = prev;
            while (ls > lx->start && ls[-1] != '\n')
                ls--;
            t->span.line = lx->line - 1;
            t->span.off = (uint32_t)(prev - lx->start);
            t->span.col = (uint32_t)(prev - ls) + 1;
        }
        t->span.len = 1;
        return ST_OK;
    }
    switch (CLS(*lx->p)) {
    case CN:
        lx->p++;
        t->type = T_NL;
        set_span(lx, t, from);
        t->span.len = 1;
        lx->line++;
        lx->line_start = lx->p;
        return ST_OK;
    case CA:
        return lex_name(lx, t, from);
    case CD:
        return lex_number(lx, t, from);
    case CQ:
        return lex_string(lx, t, from);
    case CX:
        lx->p++;
        return lex_error(lx, t, from, "unexpected control character");
    default:
        if (*lx->p == '/' && !after_operand(lx->prev))
            return lex_regex(lx, t, from);
        return lex_punct(lx, t, from);
    }
}

st_status st_rlex_next(rlexer *lx, rtok *t)
{
    memset(t, 0, sizeof *t);
    st_status rc = lex_one(lx, t);
    lx->prev = t->type;
    return rc;
}
