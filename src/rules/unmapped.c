/*
** rules/unmapped.c -- counts of source values no map line matched, per
** (schema field, value), so a run can list them most frequent first.
**
** Input:   pairs of strings from st_rules_apply (one counter per thread).
** Output:  counts; counters merge, and sort into an owned array.
** Errors:  ST_ERR_NOMEM.
** Limits:  values cut to ST_UNMAPPED_MAX_VALUE bytes (at a UTF-8
**          boundary); beyond ST_UNMAPPED_MAX_ENTRIES distinct pairs new
**          pairs are counted in 'dropped' only.
*/
#include <stdlib.h>
#include <string.h>

#include "rulesInt.h"

typedef struct uentry {
    char *field;            /* owned */
    char *value;            /* owned */
    uint64_t count;
    uint64_t hash;
} uentry;

struct st_unmapped {
    uentry *slots;          /* open addressing, power-of-two capacity */
    size_t cap, size;
    uint64_t dropped;
};

static uint64_t hash_pair(const char *a, const char *b, size_t blen)
{
    uint64_t h = 1469598103934665603ull;
    for (; *a; a++)
        h = (h ^ (unsigned char)*a) * 1099511628211ull;
    h = (h ^ 0xFF) * 1099511628211ull;
    for (size_t i = 0; i < blen; i++)
        h = (h ^ (unsigned char)b[i]) * 1099511628211ull;
    return h;
}

st_status st_unmapped_new(st_unmapped **out)
{
    *out = st_calloc(1, sizeof **out);
    return *out ? ST_OK : ST_ERR_NOMEM;
}

void st_unmapped_free(st_unmapped *u)
{
    if (!u)
        return;
    for (size_t i = 0; i < u->cap; i++) {
        st_free(u->slots[i].field);
        st_free(u->slots[i].value);
    }
    st_free(u->slots);
    st_free(u);
}

static st_status grow(st_unmapped *u)
{
    size_t cap = u->cap ? u->cap * 2 : 64;
    uentry *slots = st_calloc(cap, sizeof *slots);
    if (!slots)
        return ST_ERR_NOMEM;
    for (size_t i = 0; i < u->cap; i++) {
        if (!u->slots[i].field)
            continue;
        size_t k = u->slots[i].hash & (cap - 1);
        while (slots[k].field)
            k = (k + 1) & (cap - 1);
        slots[k] = u->slots[i];
    }
    st_free(u->slots);
    u->slots = slots;
    u->cap = cap;
    return ST_OK;
}

/* Length of 'value' cut to the limit without splitting a character. */
static size_t cut_length(const char *value)
{
    size_t n = strlen(value);
    if (n <= ST_UNMAPPED_MAX_VALUE)
        return n;
    n = ST_UNMAPPED_MAX_VALUE;
    while (n > 0 && ((unsigned char)value[n] & 0xC0) == 0x80)
        n--;
    return n;
}

st_status st_unmapped_add(st_unmapped *u, const char *field, const char *value, uint64_t n)
{
    size_t vlen = cut_length(value);
    uint64_t h = hash_pair(field, value, vlen);
    if (u->cap) {
        for (size_t k = h & (u->cap - 1); u->slots[k].field; k = (k + 1) & (u->cap - 1)) {
            uentry *e = &u->slots[k];
            if (e->hash == h && !strcmp(e->field, field) && strlen(e->value) == vlen &&
                !memcmp(e->value, value, vlen)) {
                e->count += n;
                return ST_OK;
            }
        }
    }
    if (u->size >= ST_UNMAPPED_MAX_ENTRIES) {
        u->dropped += n;
        return ST_OK;
    }
    if ((u->size + 1) * 2 > u->cap) {
        st_status rc = grow(u);
        if (rc != ST_OK)
            return rc;
    }
    char *f = st_strdup(field);
    char *v = st_strndup(value, vlen);
    if (!f || !v) {
        st_free(f);
        st_free(v);
        return ST_ERR_NOMEM;
    }
    size_t k = h & (u->cap - 1);
    while (u->slots[k].field)
        k = (k + 1) & (u->cap - 1);
    u->slots[k] = (uentry){f, v, n, h};
    u->size++;
    return ST_OK;
}

st_status st_unmapped_merge(st_unmapped *dst, const st_unmapped *src)
{
    for (size_t i = 0; i < src->cap; i++) {
        const uentry *e = &src->slots[i];
        if (!e->field)
            continue;
        st_status rc = st_unmapped_add(dst, e->field, e->value, e->count);
        if (rc != ST_OK)
            return rc;
    }
    dst->dropped += src->dropped;
    return ST_OK;
}

size_t st_unmapped_size(const st_unmapped *u) { return u->size; }
uint64_t st_unmapped_dropped(const st_unmapped *u) { return u->dropped; }

static int by_count(const void *a, const void *b)
{
    const st_unmapped_item *x = a, *y = b;
    if (x->count != y->count)
        return x->count > y->count ? -1 : 1;
    int c = strcmp(x->field, y->field);
    return c ? c : strcmp(x->value, y->value);
}

st_status st_unmapped_sorted(const st_unmapped *u, st_unmapped_item **items, size_t *n)
{
    *items = NULL;
    *n = 0;
    st_unmapped_item *out = st_malloc((u->size ? u->size : 1) * sizeof *out);
    if (!out)
        return ST_ERR_NOMEM;
    size_t k = 0;
    for (size_t i = 0; i < u->cap; i++)
        if (u->slots[i].field)
            out[k++] = (st_unmapped_item){u->slots[i].field, u->slots[i].value,
                                          u->slots[i].count};
    qsort(out, k, sizeof *out, by_count);
    *items = out;
    *n = k;
    return ST_OK;
}
