/*
** rules/arena.c -- a bump allocator for everything a rule set builds while
** loading: strings, tokens' unescaped text, the syntax tree, compiled tables.
**
** Input:   sizes; memory comes from st_malloc, so the allocation-failure
**          hook reaches it.
** Output:  zeroed, 16-byte aligned blocks that live until st_arena_free.
** Errors:  NULL when memory runs out; nothing is freed one by one.
** Limits:  none of its own; callers limit what they parse.
*/
#include <stdarg.h>
#include <stdio.h>
#include <string.h>

#include "rulesInt.h"

#define ARENA_BLOCK 16384

struct st_arena_block {
    st_arena_block *next;
    size_t size;
    _Alignas(16) unsigned char data[];
};

void st_arena_init(st_arena *a)
{
    memset(a, 0, sizeof *a);
}

void st_arena_free(st_arena *a)
{
    st_arena_block *b = a->head;
    while (b) {
        st_arena_block *next = b->next;
        st_free(b);
        b = next;
    }
    st_arena_init(a);
}

void *st_arena_alloc(st_arena *a, size_t n)
{
    n = (n + 15) & ~(size_t)15;
    if (n == 0)
        n = 16;
    if (!a->head || a->head->size - a->used < n) {
        /* Big requests get a block of their own, kept behind the head so
        ** the head's free room is not wasted. */
        size_t size = n > ARENA_BLOCK / 4 ? n : ARENA_BLOCK;
        st_arena_block *b = st_malloc(sizeof *b + size);
        if (!b)
            return NULL;
        b->size = size;
        if (size != ARENA_BLOCK && a->head) {
            b->next = a->head->next;
            a->head->next = b;
            memset(b->data, 0, n);
            a->total += n;
            return b->data;
        }
        b->next = a->head;
        a->head = b;
        a->used = 0;
    }
    void *p = a->head->data + a->used;
    a->used += n;
    a->total += n;
    memset(p, 0, n);
    return p;
}

char *st_arena_strndup(st_arena *a, const char *s, size_t n)
{
    char *d = st_arena_alloc(a, n + 1);
    if (!d)
        return NULL;
    memcpy(d, s, n);
    d[n] = '\0';
    return d;
}

char *st_arena_printf(st_arena *a, const char *fmt, ...)
{
    va_list ap;
    va_start(ap, fmt);
    int n = vsnprintf(NULL, 0, fmt, ap);
    va_end(ap);
    if (n < 0)
        return NULL;
    char *d = st_arena_alloc(a, (size_t)n + 1);
    if (!d)
        return NULL;
    va_start(ap, fmt);
    vsnprintf(d, (size_t)n + 1, fmt, ap);
    va_end(ap);
    return d;
}
