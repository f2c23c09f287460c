/*
** explain/explain_render.c -- an st_explanation as text for a terminal or
** as one JSON object (YAJL's generator).
**
** Input:   an st_explanation (explain.h), borrowed.
** Output:  appended to an st_buf; nothing is printed here.
** Errors:  ST_ERR_NOMEM; ST_ERR_FORMAT if YAJL refuses a value (it checks
**          UTF-8, which the loader already made valid).
**
** JSON layout (docs/stocktake.1, section explain):
**   { "file", "bid", "found_in": "buildings"|"set_aside", "status",
**     "reason", "duplicate_of",             (set_aside only)
**     "building": { own columns },
**     "fields": [ { "name", "value", "from", "rule", "rule_text" } ],
**     "source": { attribute: value },      (non-empty ones)
**     "findings": [ { "code", "severity", "message" } ],
**     "findings_total" }
** Values that are numbers in the output are JSON numbers, the rest
** strings, an empty value null.
*/
#include <string.h>

#include <yajl_gen.h>

#include "stocktake/explain.h"

/* ---- text ---------------------------------------------------------------- */

/* Characters (not bytes) of UTF-8 text, for aligning columns. */
static size_t width_of(const char *s)
{
    size_t n = 0;
    for (; s && *s; s++)
        n += ((unsigned char)*s & 0xC0) != 0x80;
    return n;
}

/* Append 's' (or 'empty' when s is NULL or "") padded to 'width'
** characters. */
static st_status put_padded(st_buf *b, const char *s, const char *empty, size_t width)
{
    const char *t = s && *s ? s : empty;
    st_status rc = st_buf_puts(b, t);
    for (size_t w = width_of(t); rc == ST_OK && w < width; w++)
        rc = st_buf_append(b, " ", 1);
    return rc;
}

static size_t widest(const st_explain_pair *p, size_t n, size_t at_least)
{
    size_t w = at_least;
    for (size_t i = 0; i < n; i++)
        if (width_of(p[i].name) > w)
            w = width_of(p[i].name);
    return w;
}

/* The own columns, but status, reason and duplicate_of, which the
** heading lines show. */
static st_status text_own(const st_explanation *e, st_buf *b)
{
    size_t w = widest(e->own, e->nown, 12);
    st_status rc = ST_OK;
    if (e->reason)
        rc = st_buf_printf(b, "  %-*s %s\n", (int)w, "reason", e->reason);
    if (rc == ST_OK && e->duplicate_of)
        rc = st_buf_printf(b, "  %-*s %s (the building that was kept)\n", (int)w,
                           "duplicate of", e->duplicate_of);
    for (size_t i = 0; rc == ST_OK && i < e->nown; i++) {
        const char *name = e->own[i].name;
        if (!strcmp(name, "bid") || !strcmp(name, "status") || !strcmp(name, "reason") ||
            !strcmp(name, "duplicate_of"))
            continue;
        rc = st_buf_puts(b, "  ");
        if (rc == ST_OK)
            rc = put_padded(b, name, "", w + 1);
        if (rc == ST_OK)
            rc = st_buf_printf(b, "%s\n", e->own[i].value && *e->own[i].value
                                              ? e->own[i].value : "-");
    }
    return rc;
}

static st_status text_fields(const st_explanation *e, st_buf *b)
{
    if (e->set_aside)
        return st_buf_puts(b, "\nfields: none (rules apply to kept buildings only)\n");
    if (!e->nfields)
        return st_buf_puts(b, "\nfields: none (the run had no rule schema)\n");
    size_t wn = 5, wv = 5, wf = 4;
    for (size_t i = 0; i < e->nfields; i++) {
        const st_explain_field *f = &e->fields[i];
        wn = width_of(f->name) > wn ? width_of(f->name) : wn;
        wv = width_of(f->value) > wv ? width_of(f->value) : wv;
        wf = width_of(f->from) > wf ? width_of(f->from) : wf;
    }
    st_status rc = st_buf_puts(b, "\n  ");
    if (rc == ST_OK)
        rc = put_padded(b, "field", "", wn + 2);
    if (rc == ST_OK)
        rc = put_padded(b, "value", "", wv + 2);
    if (rc == ST_OK)
        rc = put_padded(b, "from", "", wf + 2);
    if (rc == ST_OK)
        rc = st_buf_puts(b, "rule\n");
    for (size_t i = 0; rc == ST_OK && i < e->nfields; i++) {
        const st_explain_field *f = &e->fields[i];
        rc = st_buf_puts(b, "  ");
        if (rc == ST_OK)
            rc = put_padded(b, f->name, "", wn + 2);
        if (rc == ST_OK)
            rc = put_padded(b, f->value, "-", wv + 2);
        if (rc == ST_OK)
            rc = put_padded(b, f->from, "-", wf + 2);
        if (rc == ST_OK)
            rc = st_buf_printf(b, "%s\n", f->rule ? f->rule : "-");
        if (rc == ST_OK && f->rule_text)
            rc = st_buf_printf(b, "      | %s\n", f->rule_text);
        else if (rc == ST_OK && f->rule)
            rc = st_buf_puts(b, "      | (the rule file is not at that path any more)\n");
    }
    return rc;
}

static st_status text_source(const st_explanation *e, st_buf *b)
{
    if (!e->nsource)
        return st_buf_puts(b, "\nsource attributes: none filled\n");
    size_t w = widest(e->source, e->nsource, 0);
    st_status rc = st_buf_puts(b, "\nsource attributes (filled ones):\n");
    for (size_t i = 0; rc == ST_OK && i < e->nsource; i++) {
        rc = st_buf_puts(b, "  ");
        if (rc == ST_OK)
            rc = put_padded(b, e->source[i].name, "", w + 2);
        if (rc == ST_OK)
            rc = st_buf_printf(b, "%s\n", e->source[i].value);
    }
    return rc;
}

static st_status text_findings(const st_explanation *e, st_buf *b)
{
    if (!e->findings_total)
        return st_buf_puts(b, "\nfindings: none\n");
    st_status rc = st_buf_printf(b, "\nfindings (%llu):\n", (unsigned long long)e->findings_total);
    for (size_t i = 0; rc == ST_OK && i < e->nfindings; i++) {
        const st_explain_finding *g = &e->findings[i];
        rc = st_buf_printf(b, "  %-7s  %s  %s\n", g->severity ? g->severity : "-",
                           g->code ? g->code : "-", g->message ? g->message : "");
    }
    if (rc == ST_OK && e->findings_total > e->nfindings)
        rc = st_buf_printf(b, "  ... and %llu more\n",
                           (unsigned long long)(e->findings_total - e->nfindings));
    return rc;
}

st_status st_explain_render_text(const st_explanation *e, st_buf *out)
{
    st_status rc = st_buf_printf(out, "building %llu of %s: %s, status %s\n",
                                 (unsigned long long)e->bid, e->path,
                                 e->set_aside ? "set aside" : "in buildings",
                                 e->status ? e->status : "-");
    if (rc == ST_OK)
        rc = text_own(e, out);
    if (rc == ST_OK)
        rc = text_fields(e, out);
    if (rc == ST_OK)
        rc = text_source(e, out);
    if (rc == ST_OK)
        rc = text_findings(e, out);
    return rc;
}

/* ---- JSON ------------------------------------------------------------------ */

/* yajl_gen with a sticky status, so the generator code reads straight. */
typedef struct jw {
    yajl_gen g;
    int bad;
} jw;

static void jcheck(jw *w, yajl_gen_status s)
{
    if (s != yajl_gen_status_ok)
        w->bad = 1;
}

static void jkey(jw *w, const char *k)
{
    if (!w->bad)
        jcheck(w, yajl_gen_string(w->g, (const unsigned char *)k, strlen(k)));
}

static void jstr(jw *w, const char *s)
{
    if (w->bad)
        return;
    if (!s)
        jcheck(w, yajl_gen_null(w->g));
    else
        jcheck(w, yajl_gen_string(w->g, (const unsigned char *)s, strlen(s)));
}

/* A value as a number when the loader saw one, else as text. */
static void jvalue(jw *w, const char *s, int numeric)
{
    if (!w->bad && s && numeric)
        jcheck(w, yajl_gen_number(w->g, s, strlen(s)));
    else
        jstr(w, s);
}

static void jkv(jw *w, const char *k, const char *v)
{
    jkey(w, k);
    jstr(w, v);
}

static void jopen(jw *w, int map)
{
    if (!w->bad)
        jcheck(w, map ? yajl_gen_map_open(w->g) : yajl_gen_array_open(w->g));
}

static void jclose(jw *w, int map)
{
    if (!w->bad)
        jcheck(w, map ? yajl_gen_map_close(w->g) : yajl_gen_array_close(w->g));
}

static void json_pairs(jw *w, const char *key, const st_explain_pair *p, size_t n)
{
    jkey(w, key);
    jopen(w, 1);
    for (size_t i = 0; i < n; i++) {
        jkey(w, p[i].name);
        jvalue(w, p[i].value, p[i].numeric);
    }
    jclose(w, 1);
}

static void json_body(jw *w, const st_explanation *e)
{
    jopen(w, 1);
    jkv(w, "file", e->path);
    jkey(w, "bid");
    if (!w->bad)
        jcheck(w, yajl_gen_integer(w->g, (long long)e->bid));
    jkv(w, "found_in", e->set_aside ? "set_aside" : "buildings");
    jkv(w, "status", e->status);
    if (e->set_aside) {
        jkv(w, "reason", e->reason);
        jkey(w, "duplicate_of");
        jvalue(w, e->duplicate_of, e->duplicate_of != NULL);
    }
    json_pairs(w, "building", e->own, e->nown);
    jkey(w, "fields");
    jopen(w, 0);
    for (size_t i = 0; i < e->nfields; i++) {
        const st_explain_field *f = &e->fields[i];
        jopen(w, 1);
        jkv(w, "name", f->name);
        jkv(w, "value", f->value);
        jkv(w, "from", f->from);
        jkv(w, "rule", f->rule);
        jkv(w, "rule_text", f->rule_text);
        jclose(w, 1);
    }
    jclose(w, 0);
    json_pairs(w, "source", e->source, e->nsource);
    jkey(w, "findings");
    jopen(w, 0);
    for (size_t i = 0; i < e->nfindings; i++) {
        jopen(w, 1);
        jkv(w, "code", e->findings[i].code);
        jkv(w, "severity", e->findings[i].severity);
        jkv(w, "message", e->findings[i].message);
        jclose(w, 1);
    }
    jclose(w, 0);
    jkey(w, "findings_total");
    if (!w->bad)
        jcheck(w, yajl_gen_integer(w->g, (long long)e->findings_total));
    jclose(w, 1);
}

/* yajl's printer: append to our capped buffer, remembering a failure. */
typedef struct jsink {
    st_buf *out;
    st_status rc;
} jsink;

static void j_print(void *ctx, const char *str, size_t len)
{
    jsink *k = ctx;
    if (k->rc == ST_OK)
        k->rc = st_buf_append(k->out, str, len);
}

/*
** yajl_gen does not check its own allocations (yajl 2.1 writes through a
** NULL from its allocator), so it keeps the C library's allocator rather
** than st_malloc and the test hook, which would only crash it. What it
** allocates is its small state; the text itself goes through j_print into
** 'out', whose growth is checked.
*/
st_status st_explain_render_json(const st_explanation *e, st_buf *out)
{
    jsink k = {out, ST_OK};
    jw w = {yajl_gen_alloc(NULL), 0};
    if (!w.g)
        return ST_ERR_NOMEM;
    yajl_gen_config(w.g, yajl_gen_beautify, 1);
    yajl_gen_config(w.g, yajl_gen_indent_string, "  ");
    yajl_gen_config(w.g, yajl_gen_validate_utf8, 1);
    yajl_gen_config(w.g, yajl_gen_print_callback, j_print, &k);
    json_body(&w, e);
    yajl_gen_free(w.g);
    if (k.rc != ST_OK)
        return k.rc;
    return w.bad ? ST_ERR_FORMAT : ST_OK;
}
