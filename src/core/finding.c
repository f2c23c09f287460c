/*
** core/finding.c -- the growable list of findings.
*/
#include <stdio.h>
#include <string.h>

#include "stocktake/finding.h"

void st_findings_init(st_findings *f)
{
    memset(f, 0, sizeof *f);
}

void st_findings_free(st_findings *f)
{
    for (size_t i = 0; i < f->count; i++)
        st_free(f->items[i].message);
    st_free(f->items);
    st_findings_init(f);
}

static st_status reserve(st_findings *f, size_t extra)
{
    if (f->count + extra <= f->cap)
        return ST_OK;
    size_t cap = f->cap ? f->cap : 8;
    while (cap < f->count + extra)
        cap *= 2;
    st_finding *items = st_realloc(f->items, cap * sizeof *items);
    if (!items)
        return ST_ERR_NOMEM;
    f->items = items;
    f->cap = cap;
    return ST_OK;
}

st_status st_findings_replace(st_findings *dst, size_t at, size_t n, st_findings *src)
{
    if (at > dst->count || n > dst->count - at)
        return ST_ERR_USAGE;
    if (src->count > n) {
        st_status rc = reserve(dst, src->count - n);
        if (rc != ST_OK)
            return rc;
    }
    for (size_t i = at; i < at + n; i++)
        st_free(dst->items[i].message);
    size_t tail = dst->count - at - n;
    if (tail)
        memmove(dst->items + at + src->count, dst->items + at + n, tail * sizeof *dst->items);
    if (src->count)
        memcpy(dst->items + at, src->items, src->count * sizeof *src->items);
    dst->count = dst->count - n + src->count;
    src->count = 0;
    return ST_OK;
}

st_status st_findings_add(st_findings *f, uint64_t bid, const char *code,
                          st_severity sev, double x, double y, const char *fmt, ...)
{
    st_status rc = reserve(f, 1);
    if (rc != ST_OK)
        return rc;
    char msg[1024];
    va_list ap;
    va_start(ap, fmt);
    vsnprintf(msg, sizeof msg, fmt, ap);
    va_end(ap);
    char *copy = st_strdup(msg);
    if (!copy)
        return ST_ERR_NOMEM;
    f->items[f->count++] = (st_finding){bid, code, sev, copy, x, y};
    return ST_OK;
}

st_status st_findings_move(st_findings *dst, st_findings *src)
{
    if (src->count == 0)
        return ST_OK;   /* also keeps memcpy away from NULL arrays */
    st_status rc = reserve(dst, src->count);
    if (rc != ST_OK)
        return rc;
    memcpy(dst->items + dst->count, src->items, src->count * sizeof *src->items);
    dst->count += src->count;
    src->count = 0;
    return ST_OK;
}

const char *st_severity_name(st_severity s)
{
    return s == ST_SEV_ERROR ? "error" : s == ST_SEV_WARNING ? "warning" : "note";
}
