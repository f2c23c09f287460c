/*
** core/diag.c -- diagnostics: collected by the library, rendered by the CLI.
**
** Input:  severity, status code, location, printf-style message.
** Output: an st_diags list; st_diag_render() prints one in the project's
**         one shape ("file:line:col: error: ..." or "file: feature N: ...").
** Limits: beyond max_items (default 1000) diagnostics are counted, not kept,
**         so a file with a million bad features cannot exhaust memory.
*/
#include <stdio.h>
#include <string.h>

#include "stocktake/core.h"

const char *st_status_name(st_status s)
{
    switch (s) {
    case ST_OK: return "ok";
    case ST_ERR_NOMEM: return "nomem";
    case ST_ERR_IO: return "io";
    case ST_ERR_FORMAT: return "format";
    case ST_ERR_RULE: return "rule";
    case ST_ERR_GEOS: return "geos";
    case ST_ERR_PROJ: return "proj";
    case ST_ERR_LIMIT: return "limit";
    case ST_ERR_USAGE: return "usage";
    case ST_ERR_STOPPED: return "stopped";
    }
    return "unknown";
}

void st_diags_init(st_diags *d)
{
    memset(d, 0, sizeof *d);
}

void st_diags_free(st_diags *d)
{
    for (size_t i = 0; i < d->count; i++) {
        st_free(d->items[i].file);
        st_free(d->items[i].message);
        st_free(d->items[i].excerpt);
    }
    st_free(d->items);
    st_diags_init(d);
}

st_status st_diags_addv(st_diags *d, st_severity sev, st_status code,
                        const st_loc *loc, const char *fmt, va_list ap)
{
    if (sev == ST_SEV_ERROR)
        d->errors++;
    else if (sev == ST_SEV_WARNING)
        d->warnings++;
    size_t max = d->max_items ? d->max_items : 1000;
    if (d->count >= max) {
        d->dropped++;
        return code;
    }
    if (d->count == d->cap) {
        size_t cap = d->cap ? d->cap * 2 : 8;
        st_diag *items = st_realloc(d->items, cap * sizeof *items);
        if (!items) {
            d->dropped++;
            return code;
        }
        d->items = items;
        d->cap = cap;
    }
    char msg[2048];
    vsnprintf(msg, sizeof msg, fmt, ap);
    st_diag *g = &d->items[d->count];
    memset(g, 0, sizeof *g);
    g->severity = sev;
    g->code = code;
    st_loc none = ST_LOC_NONE;
    if (!loc)
        loc = &none;
    g->file = st_strdup(loc->file);
    g->line = loc->line;
    g->col = loc->col;
    g->len = loc->len;
    g->feature = loc->feature;
    g->offset = loc->offset;
    g->message = st_strdup(msg);
    if (!g->message || (loc->file && !g->file)) {
        st_free(g->file);
        st_free(g->message);
        d->dropped++;
        return code;
    }
    d->count++;
    return code;
}

st_status st_diags_add(st_diags *d, st_severity sev, st_status code,
                       const st_loc *loc, const char *fmt, ...)
{
    va_list ap;
    va_start(ap, fmt);
    st_status rc = st_diags_addv(d, sev, code, loc, fmt, ap);
    va_end(ap);
    return rc;
}

void st_diags_set_excerpt(st_diags *d, const char *line, size_t n)
{
    if (!d->count)
        return;
    st_diag *g = &d->items[d->count - 1];
    st_free(g->excerpt);
    g->excerpt = st_strndup(line, n);
}

static const char *severity_word(st_severity s)
{
    return s == ST_SEV_ERROR ? "error" : s == ST_SEV_WARNING ? "warning" : "note";
}

/* The excerpt line, then a caret under col with ~ for the rest of len. */
static st_status render_caret(const st_diag *g, st_buf *out)
{
    st_status rc = st_buf_printf(out, "  %s\n  ", g->excerpt);
    for (long i = 1; rc == ST_OK && i < g->col; i++)
        rc = st_buf_append(out, g->excerpt[i - 1] == '\t' ? "\t" : " ", 1);
    if (rc == ST_OK)
        rc = st_buf_puts(out, "^");
    for (long i = 1; rc == ST_OK && i < g->len; i++)
        rc = st_buf_puts(out, "~");
    return rc == ST_OK ? st_buf_puts(out, "\n") : rc;
}

st_status st_diag_render(const st_diag *g, st_buf *out)
{
    st_status rc = ST_OK;
    if (g->file && g->line > 0)
        rc = g->col > 0 ? st_buf_printf(out, "%s:%ld:%ld: ", g->file, g->line, g->col)
                        : st_buf_printf(out, "%s:%ld: ", g->file, g->line);
    else if (g->file && g->feature >= 0)
        rc = st_buf_printf(out, "%s: feature %lld: ", g->file, g->feature);
    else if (g->file && g->offset >= 0)
        rc = st_buf_printf(out, "%s: byte %lld: ", g->file, g->offset);
    else if (g->file)
        rc = st_buf_printf(out, "%s: ", g->file);
    if (rc == ST_OK)
        rc = st_buf_printf(out, "%s: %s\n", severity_word(g->severity), g->message);
    if (rc == ST_OK && g->excerpt && g->col > 0)
        rc = render_caret(g, out);
    return rc;
}
