/*
** rules/load.c -- reading rule files, following includes, and the rule
** set's lifetime; also the accessors of what a set declares.
**
** Input:   paths of rule files, or rule text in memory.
** Output:  an st_rules set whose sources, arena and compiled regular
**          expressions it owns; st_rules_free releases everything.
** Errors:  a file that cannot be read is ST_ERR_IO with a diagnostic at the
**          include that named it; an include cycle is an error naming the
**          chain ("a.rules -> b.rules -> a.rules"); any error diagnostic
**          makes loading fail with ST_ERR_RULE.
** Limits:  ST_RULES_MAX_FILE_BYTES a file, ST_RULES_MAX_INCLUDE_DEPTH
**          nested includes; a file included twice (not in a cycle) is read
**          once. Only regular files are read: a FIFO, device or folder is
**          an ST_ERR_IO error (a FIFO would block the load for ever).
*/
#include <errno.h>
#include <limits.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "stocktake/sha256.h"
#include "rulesInt.h"

/* ---- diagnostics ---------------------------------------------------- */

st_status st_rdiag(st_rules *R, st_severity sev, st_status code, const rspan *span,
                   const char *fmt, ...)
{
    const rsource *s = &R->sources[span->src];
    st_loc loc = ST_LOC_LINE(s->name, span->line, span->col, span->len);
    va_list ap;
    va_start(ap, fmt);
    size_t before = R->diags->count;
    st_diags_addv(R->diags, sev, code, &loc, fmt, ap);
    va_end(ap);
    if (sev == ST_SEV_ERROR)
        R->errors++;
    if (R->diags->count > before) {
        const char *line = s->text + span->off - (span->col - 1);
        const char *end = line;
        while (end < s->text + s->len && *end != '\n')
            end++;
        if (end > line && end[-1] == '\r')
            end--;
        st_diags_set_excerpt(R->diags, line, (size_t)(end - line));
    }
    return code;
}

const char *st_rrule_name(st_rules *R, const rspan *span)
{
    return st_arena_printf(&R->arena, "%s:%u", R->sources[span->src].name, span->line);
}

/* ---- sources ---------------------------------------------------------- */

/* Adds a source (takes ownership of name, real and text, also on failure). */
static st_status add_source(st_rules *R, char *name, char *real, char *text, size_t len,
                            uint32_t *index)
{
    if (R->nsources == R->cap_sources) {
        uint32_t cap = R->cap_sources ? R->cap_sources * 2 : 4;
        rsource *s = st_realloc(R->sources, cap * sizeof *s);
        if (!s) {
            st_free(name);
            st_free(real);
            st_free(text);
            return ST_ERR_NOMEM;
        }
        R->sources = s;
        R->cap_sources = cap;
    }
    rsource *s = &R->sources[R->nsources];
    s->name = name;
    s->real = real;
    s->text = text;
    s->len = len;
    *index = R->nsources++;
    return ST_OK;
}

/* Reads 'path' whole. *err gets errno-like text on ST_ERR_IO. */
static st_status read_file(const char *path, char **text, size_t *len, const char **err)
{
    *text = NULL;
    *len = 0;
    FILE *fp = st_fopen_regular(path);   /* a FIFO would block for ever */
    if (!fp) {
        *err = st_open_error(errno);
        return ST_ERR_IO;
    }
    st_status rc = ST_OK;
    st_buf b;
    st_buf_init(&b, ST_RULES_MAX_FILE_BYTES);
    char chunk[8192];
    size_t n;
    while ((n = fread(chunk, 1, sizeof chunk, fp)) > 0) {
        rc = st_buf_append(&b, chunk, n);
        if (rc != ST_OK)
            break;
    }
    if (rc == ST_OK && ferror(fp)) {
        *err = "read error";
        rc = ST_ERR_IO;
    }
    fclose(fp);
    if (rc != ST_OK) {
        if (rc == ST_ERR_LIMIT)
            *err = "the file is larger than the limit of 4 MiB";
        st_buf_free(&b);
        return rc;
    }
    *len = b.len;
    *text = st_buf_take(&b);
    return *text ? ST_OK : ST_ERR_NOMEM;
}

/* Rule files are UTF-8: report the first invalid byte. */
static int check_utf8(st_rules *R, uint32_t src)
{
    const rsource *s = &R->sources[src];
    size_t ok = st_utf8_valid_prefix(s->text, s->len);
    if (ok == s->len)
        return 1;
    rspan sp = {src, (uint32_t)ok, 1, 1, 1};
    for (size_t i = 0; i < ok; i++)
        if (s->text[i] == '\n') {
            sp.line++;
            sp.col = 1;
        } else {
            sp.col++;
        }
    st_rdiag(R, ST_SEV_ERROR, ST_ERR_RULE, &sp, "the file is not valid UTF-8 here");
    return 0;
}

static st_status parse_new_source(st_rules *R, uint32_t src, int depth,
                                  const char **chain, int nchain)
{
    if (!check_utf8(R, src))
        return ST_OK;
    const char *next[ST_RULES_MAX_INCLUDE_DEPTH + 2];
    int n = 0;
    for (int i = 0; i < nchain && n < ST_RULES_MAX_INCLUDE_DEPTH + 1; i++)
        next[n++] = chain[i];
    next[n++] = R->sources[src].real ? R->sources[src].real : R->sources[src].name;
    return st_rparse_source(R, src, depth, next, n);
}

/* The display name of the source whose real path is 'real'. */
static const char *display_of(st_rules *R, const char *real)
{
    for (uint32_t i = 0; i < R->nsources; i++)
        if (R->sources[i].real && !strcmp(R->sources[i].real, real))
            return R->sources[i].name;
    return real;
}

/* 'rel' relative to the folder of 'base' (unless absolute). Returns owned. */
static char *resolve_path(const char *base, const char *rel)
{
    if (rel[0] == '/')
        return st_strdup(rel);
    const char *slash = strrchr(base, '/');
    if (!slash)
        return st_strdup(rel);
    return st_strdup_printf("%.*s/%s", (int)(slash - base), base, rel);
}

st_status st_rules_include(st_rules *R, const rspan *at, const char *path, int depth,
                           const char **chain, int nchain)
{
    if (depth > ST_RULES_MAX_INCLUDE_DEPTH) {
        st_rdiag(R, ST_SEV_ERROR, ST_ERR_LIMIT, at,
                 "includes nest deeper than the limit of %d", ST_RULES_MAX_INCLUDE_DEPTH);
        R->stopped = 1;
        return ST_ERR_LIMIT;
    }
    char *name = resolve_path(R->sources[at->src].name, path);
    if (!name)
        return ST_ERR_NOMEM;
    char realbuf[PATH_MAX];
    if (!realpath(name, realbuf)) {
        st_rdiag(R, ST_SEV_ERROR, ST_ERR_IO, at, "cannot read included file '%s': %s", name,
                 strerror(errno));
        st_free(name);
        return ST_ERR_IO;
    }
    for (int i = 0; i < nchain; i++) {
        if (strcmp(chain[i], realbuf) != 0)
            continue;
        st_buf b;
        st_buf_init(&b, 0);
        st_status rc = ST_OK;
        for (int k = i; k < nchain && rc == ST_OK; k++)
            rc = st_buf_printf(&b, "%s -> ", display_of(R, chain[k]));
        if (rc == ST_OK)
            rc = st_buf_puts(&b, display_of(R, realbuf));
        if (rc == ST_OK)
            st_rdiag(R, ST_SEV_ERROR, ST_ERR_RULE, at, "include cycle: %s", b.data);
        st_buf_free(&b);
        st_free(name);
        return rc == ST_OK ? ST_ERR_RULE : rc;
    }
    for (uint32_t i = 0; i < R->nsources; i++)
        if (R->sources[i].real && !strcmp(R->sources[i].real, realbuf)) {
            st_free(name);
            return ST_OK;   /* already part of the set */
        }
    char *real = st_strdup(realbuf);
    if (!real) {
        st_free(name);
        return ST_ERR_NOMEM;
    }
    char *text;
    size_t len;
    const char *err = NULL;
    st_status rc = read_file(name, &text, &len, &err);
    if (rc != ST_OK) {
        if (rc != ST_ERR_NOMEM)
            st_rdiag(R, ST_SEV_ERROR, rc, at, "cannot read included file '%s': %s", name, err);
        st_free(name);
        st_free(real);
        return rc;
    }
    uint32_t src;
    rc = add_source(R, name, real, text, len, &src);
    if (rc != ST_OK)
        return rc;
    return parse_new_source(R, src, depth, chain, nchain);
}

/* ---- the set ---------------------------------------------------------- */

void st_rules_digest(const st_rules *R, char hex[65])
{
    static const char digits[] = "0123456789abcdef";
    st_sha256 h;
    st_sha256_init(&h);
    for (uint32_t i = 0; i < R->nsources; i++) {
        uint64_t len = R->sources[i].len;
        uint8_t le[8];
        for (int k = 0; k < 8; k++)
            le[k] = (uint8_t)(len >> (8 * k));
        st_sha256_update(&h, le, sizeof le);
        st_sha256_update(&h, R->sources[i].text, R->sources[i].len);
    }
    uint8_t d[32];
    st_sha256_final(&h, d);
    for (int k = 0; k < 32; k++) {
        hex[2 * k] = digits[d[k] >> 4];
        hex[2 * k + 1] = digits[d[k] & 15];
    }
    hex[64] = '\0';
}

void st_rules_free(st_rules *R)
{
    if (!R)
        return;
    for (uint32_t i = 0; i < R->ncodes; i++)
        pcre2_code_free(R->codes[i]);
    st_free(R->codes);
    pcre2_compile_context_free(R->cctx);
    pcre2_general_context_free(R->gctx);
    for (uint32_t i = 0; i < R->nsources; i++) {
        st_free(R->sources[i].name);
        st_free(R->sources[i].real);
        st_free(R->sources[i].text);
    }
    st_free(R->sources);
    st_free(R->attrs);
    st_arena_free(&R->arena);
    st_free(R);
}

static st_status new_set(st_diags *diags, st_rules **out)
{
    st_rules *R = st_calloc(1, sizeof *R);
    *out = R;
    if (!R)
        return ST_ERR_NOMEM;
    st_arena_init(&R->arena);
    R->diags = diags;
    return ST_OK;
}

/* Check the parsed set and hand it out, or free it. */
static st_status finish(st_rules *R, st_status rc, st_rules **out)
{
    /* The checker runs after syntax errors too, so lint reports everything;
    ** lines that failed to parse are simply absent. */
    if (rc == ST_OK && !R->stopped)
        rc = st_rcheck_set(R);
    if (rc == ST_OK && R->errors > 0)
        rc = ST_ERR_RULE;
    if (rc != ST_OK) {
        st_rules_free(R);
        return rc;
    }
    *out = R;
    return ST_OK;
}

st_status st_rules_load(const char *const *paths, size_t n, st_diags *diags, st_rules **out)
{
    *out = NULL;
    st_rules *R;
    st_status rc = new_set(diags, &R);
    if (rc != ST_OK)
        return rc;
    for (size_t i = 0; i < n && rc == ST_OK && !R->stopped; i++) {
        char realbuf[PATH_MAX];
        char *text;
        size_t len;
        const char *err = NULL;
        st_loc loc = ST_LOC_FILE(paths[i]);
        if (!realpath(paths[i], realbuf)) {
            st_diags_add(diags, ST_SEV_ERROR, ST_ERR_IO, &loc, "cannot read rule file: %s",
                         strerror(errno));
            rc = ST_ERR_IO;
            break;
        }
        int seen = 0;
        for (uint32_t k = 0; k < R->nsources; k++)
            if (R->sources[k].real && !strcmp(R->sources[k].real, realbuf))
                seen = 1;
        if (seen)
            continue;
        rc = read_file(paths[i], &text, &len, &err);
        if (rc != ST_OK) {
            if (rc != ST_ERR_NOMEM)
                st_diags_add(diags, ST_SEV_ERROR, rc, &loc, "cannot read rule file: %s", err);
            break;
        }
        char *name = st_strdup(paths[i]);
        char *real = st_strdup(realbuf);
        if (!name || !real) {
            st_free(name);
            st_free(real);
            st_free(text);
            rc = ST_ERR_NOMEM;
            break;
        }
        uint32_t src;
        rc = add_source(R, name, real, text, len, &src);
        if (rc == ST_OK)
            rc = parse_new_source(R, src, 0, NULL, 0);
        /* Problems in a file are diagnostics; only memory stops the load. */
        if (rc != ST_ERR_NOMEM)
            rc = ST_OK;
    }
    if (rc == ST_OK && R->stopped && R->errors == 0)
        rc = ST_ERR_LIMIT;
    return finish(R, rc, out);
}

st_status st_rules_load_text(const char *name, const char *text, size_t len, st_diags *diags,
                             st_rules **out)
{
    *out = NULL;
    st_rules *R;
    st_status rc = new_set(diags, &R);
    if (rc != ST_OK)
        return rc;
    if (len > ST_RULES_MAX_FILE_BYTES) {
        st_loc loc = ST_LOC_FILE(name);
        st_diags_add(diags, ST_SEV_ERROR, ST_ERR_LIMIT, &loc,
                     "rule text is larger than the limit of 4 MiB");
        st_rules_free(R);
        return ST_ERR_LIMIT;
    }
    char *copy = st_strndup(text, len);
    char *dname = st_strdup(name);
    if (!copy || !dname) {
        st_free(copy);
        st_free(dname);
        st_rules_free(R);
        return ST_ERR_NOMEM;
    }
    uint32_t src;
    rc = add_source(R, dname, NULL, copy, len, &src);
    if (rc == ST_OK)
        rc = parse_new_source(R, src, 0, NULL, 0);
    if (rc != ST_ERR_NOMEM)
        rc = ST_OK;
    return finish(R, rc, out);
}

/* ---- accessors --------------------------------------------------------- */

const char *st_field_kind_name(st_field_kind k)
{
    switch (k) {
    case ST_KIND_CODE: return "codes";
    case ST_KIND_INTEGER: return "integer";
    case ST_KIND_REAL: return "number";
    case ST_KIND_TEXT: return "text";
    }
    return "?";
}

uint32_t st_rules_field_count(const st_rules *r) { return r->nfields; }
const st_schema_field *st_rules_field(const st_rules *r, uint32_t i)
{
    return i < r->nfields ? &r->fields[i] : NULL;
}

int32_t st_rules_field_find(const st_rules *r, const char *name)
{
    for (uint32_t i = 0; i < r->nfields; i++)
        if (!strcmp(r->fields[i].name, name))
            return (int32_t)i;
    return -1;
}

size_t st_rules_setting_count(const st_rules *r) { return r->nsettings; }
const st_rule_setting *st_rules_setting(const st_rules *r, size_t i)
{
    return i < r->nsettings ? &r->settings[i] : NULL;
}

const st_rule_setting *st_rules_setting_find(const st_rules *r, const char *name)
{
    for (size_t i = r->nsettings; i-- > 0;)
        if (!strcmp(r->settings[i].name, name))
            return &r->settings[i];
    return NULL;
}

size_t st_rules_default_count(const st_rules *r) { return r->ndefaults; }
const st_default_rule *st_rules_default(const st_rules *r, size_t i)
{
    return i < r->ndefaults ? &r->defaults[i] : NULL;
}
size_t st_rules_table_count(const st_rules *r) { return r->ntables; }
const st_default_table *st_rules_table(const st_rules *r, size_t i)
{
    return i < r->ntables ? &r->tables[i] : NULL;
}
size_t st_rules_learn_count(const st_rules *r) { return r->nlearns; }
const st_default_learn *st_rules_learn(const st_rules *r, size_t i)
{
    return i < r->nlearns ? &r->learns[i] : NULL;
}
size_t st_rules_gate_count(const st_rules *r) { return r->ngates; }
const st_gate_rule *st_rules_gate(const st_rules *r, size_t i)
{
    return i < r->ngates ? &r->gates[i] : NULL;
}

int st_rules_gate_holds(const st_gate_rule *g, double v)
{
    switch (g->cmp) {
    case ST_CMP_EQ: return v == g->threshold;
    case ST_CMP_NE: return v != g->threshold;
    case ST_CMP_LT: return v < g->threshold;
    case ST_CMP_LE: return v <= g->threshold;
    case ST_CMP_GT: return v > g->threshold;
    case ST_CMP_GE: return v >= g->threshold;
    }
    return 0;
}

static int lower(int c)
{
    return c >= 'A' && c <= 'Z' ? c + 32 : c;
}

int st_rules_glob(const char *p, const char *t)
{
    const char *star = NULL, *mark = NULL;
    while (*t) {
        if (*p == '*') {
            star = p++;
            mark = t;
        } else if (*p && (*p == '?' || lower((unsigned char)*p) == lower((unsigned char)*t))) {
            p++;
            t++;
        } else if (star) {
            p = star + 1;
            t = ++mark;
        } else {
            return 0;
        }
    }
    while (*p == '*')
        p++;
    return *p == '\0';
}
