/*
** core/alloc.c -- the allocation wrappers every module uses.
**
** Why: one place to count allocations, so tests can make the Nth fail and
** check that every caller returns ST_ERR_NOMEM and leaks nothing. The
** counter is thread-local: tests arm it in their own thread only.
*/
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "stocktake/core.h"

static _Thread_local long fail_at;     /* 0 = disarmed */
static _Thread_local long counted;

void st_alloc_fail_after(long n)
{
    fail_at = n;
    counted = 0;
}

long st_alloc_count(void)
{
    return counted;
}

/* 1 if this allocation is the one a test asked to fail. */
static int should_fail(void)
{
    if (fail_at <= 0)
        return 0;
    return ++counted == fail_at;
}

void *st_malloc(size_t n)
{
    if (should_fail())
        return NULL;
    return malloc(n ? n : 1);
}

void *st_calloc(size_t count, size_t n)
{
    if (should_fail())
        return NULL;
    return calloc(count ? count : 1, n ? n : 1);
}

void *st_realloc(void *p, size_t n)
{
    if (should_fail())
        return NULL;
    return realloc(p, n ? n : 1);
}

void st_free(void *p)
{
    free(p);
}

char *st_strndup(const char *s, size_t n)
{
    if (!s)
        return NULL;
    char *d = st_malloc(n + 1);
    if (!d)
        return NULL;
    memcpy(d, s, n);
    d[n] = '\0';
    return d;
}

char *st_strdup(const char *s)
{
    return s ? st_strndup(s, strlen(s)) : NULL;
}

char *st_strdup_printf(const char *fmt, ...)
{
    va_list ap;
    va_start(ap, fmt);
    int n = vsnprintf(NULL, 0, fmt, ap);
    va_end(ap);
    if (n < 0)
        return NULL;
    char *d = st_malloc((size_t)n + 1);
    if (!d)
        return NULL;
    va_start(ap, fmt);
    vsnprintf(d, (size_t)n + 1, fmt, ap);
    va_end(ap);
    return d;
}
