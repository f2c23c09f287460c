/*
** core/buf.c -- growable byte buffer with a hard size cap.
**
** Why a cap: text read from files (a GeoJSON string, a DBF record, a rule
** file) grows a buffer; a hostile file must hit ST_ERR_LIMIT, not exhaust
** memory.
*/
#include <stdio.h>
#include <string.h>

#include "stocktake/core.h"

void st_buf_init(st_buf *b, size_t limit)
{
    b->data = NULL;
    b->len = 0;
    b->cap = 0;
    b->limit = limit;
}

/* Make room for 'extra' more bytes plus the terminating NUL. */
static st_status reserve(st_buf *b, size_t extra)
{
    if (b->limit && b->len + extra > b->limit)
        return ST_ERR_LIMIT;
    size_t need = b->len + extra + 1;
    if (need <= b->cap)
        return ST_OK;
    size_t cap = b->cap ? b->cap : 64;
    while (cap < need)
        cap *= 2;
    char *d = st_realloc(b->data, cap);
    if (!d)
        return ST_ERR_NOMEM;
    b->data = d;
    b->cap = cap;
    return ST_OK;
}

st_status st_buf_append(st_buf *b, const char *s, size_t n)
{
    st_status rc = reserve(b, n);
    if (rc != ST_OK)
        return rc;
    if (n)
        memcpy(b->data + b->len, s, n);
    b->len += n;
    b->data[b->len] = '\0';
    return ST_OK;
}

st_status st_buf_puts(st_buf *b, const char *s)
{
    return st_buf_append(b, s, strlen(s));
}

st_status st_buf_printf(st_buf *b, const char *fmt, ...)
{
    va_list ap;
    va_start(ap, fmt);
    int n = vsnprintf(NULL, 0, fmt, ap);
    va_end(ap);
    if (n < 0)
        return ST_ERR_FORMAT;
    st_status rc = reserve(b, (size_t)n);
    if (rc != ST_OK)
        return rc;
    va_start(ap, fmt);
    vsnprintf(b->data + b->len, (size_t)n + 1, fmt, ap);
    va_end(ap);
    b->len += (size_t)n;
    return ST_OK;
}

void st_buf_clear(st_buf *b)
{
    b->len = 0;
    if (b->data)
        b->data[0] = '\0';
}

void st_buf_free(st_buf *b)
{
    st_free(b->data);
    st_buf_init(b, b->limit);
}

char *st_buf_take(st_buf *b)
{
    char *d = b->data ? b->data : st_strdup("");
    st_buf_init(b, b->limit);
    return d;
}
