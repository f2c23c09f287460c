/*
** core/strtab.c -- string table: open addressing with linear probing.
**
** Input:   byte strings of any length (NUL bytes allowed).
** Output:  a dense id per distinct string, in first-seen order.
** Layout:  'slots' (a power of two, at most half full) holds id + 1, 0 for
**          empty; 'entries[id]' holds the string's hash, length and a
**          pointer into a text block. Blocks are never moved, so pointers
**          stay valid while the table grows; only 'slots' and 'entries'
**          are reallocated.
** Errors:  ST_ERR_NOMEM, or ST_ERR_LIMIT beyond the caller's limits; a
**          failed insert leaves the table as it was.
** Limits:  max_entries <= UINT32_MAX - 1 (ids are uint32_t), slot array
**          <= 2^31 entries.
*/
#include <string.h>

#include "stocktake/strtab.h"

#define BLOCK_MIN (64 * 1024)   /* text block size; larger strings get their own */

typedef struct entry {
    uint64_t hash;
    size_t len;
    const char *text;
} entry;

typedef struct block {
    struct block *next;
    size_t used, cap;
    char data[];
} block;

struct st_strtab {
    uint32_t *slots;      /* id + 1, 0 = empty */
    uint32_t nslots;      /* power of two */
    entry *entries;
    uint32_t count, cap;
    uint32_t max_entries;
    size_t bytes, max_bytes;
    block *blocks;        /* newest first */
};

/* 64-bit hash: eight bytes at a time through a multiply-xorshift step,
** then the MurmurHash3 finaliser to spread the bits over the low end the
** slot mask keeps. Quality is ample for a hash table; not cryptographic. */
static uint64_t hash_bytes(const char *s, size_t n)
{
    const uint64_t k = 0x9E3779B97F4A7C15ull;
    uint64_t h = 0x243F6A8885A308D3ull ^ (n * k);
    while (n >= 8) {
        uint64_t w;
        memcpy(&w, s, 8);
        h = (h ^ w) * k;
        h ^= h >> 29;
        s += 8;
        n -= 8;
    }
    uint64_t tail = 0;
    memcpy(&tail, s, n);
    h = (h ^ tail) * k;
    h ^= h >> 33;
    h *= 0xFF51AFD7ED558CCDull;
    h ^= h >> 33;
    h *= 0xC4CEB9FE1A85EC53ull;
    h ^= h >> 33;
    return h;
}

st_strtab *st_strtab_new(uint32_t max_entries, size_t max_bytes)
{
    st_strtab *t = st_calloc(1, sizeof *t);
    if (!t)
        return NULL;
    t->max_entries = max_entries && max_entries < UINT32_MAX - 1 ? max_entries
                                                                 : UINT32_MAX - 1;
    t->max_bytes = max_bytes ? max_bytes : SIZE_MAX;
    t->nslots = 16;
    t->slots = st_calloc(t->nslots, sizeof *t->slots);
    if (!t->slots) {
        st_free(t);
        return NULL;
    }
    return t;
}

void st_strtab_free(st_strtab *t)
{
    if (!t)
        return;
    for (block *b = t->blocks, *next; b; b = next) {
        next = b->next;
        st_free(b);
    }
    st_free(t->slots);
    st_free(t->entries);
    st_free(t);
}

/* Slot index where s lives, or the empty slot where it would go. */
static uint32_t probe(const st_strtab *t, uint64_t h, const char *s, size_t n)
{
    uint32_t mask = t->nslots - 1;
    for (uint32_t i = (uint32_t)h & mask;; i = (i + 1) & mask) {
        uint32_t v = t->slots[i];
        if (v == 0)
            return i;
        const entry *e = &t->entries[v - 1];
        if (e->hash == h && e->len == n && memcmp(e->text, s, n) == 0)
            return i;
    }
}

int st_strtab_find(const st_strtab *t, const char *s, size_t n, uint32_t *id)
{
    uint32_t v = t->slots[probe(t, hash_bytes(s, n), s, n)];
    if (v == 0)
        return 0;
    *id = v - 1;
    return 1;
}

/* Double the slot array and re-place every entry by its stored hash. */
static st_status grow_slots(st_strtab *t)
{
    if (t->nslots >= (1u << 31))
        return ST_ERR_LIMIT;
    uint32_t n = t->nslots * 2;
    uint32_t *slots = st_calloc(n, sizeof *slots);
    if (!slots)
        return ST_ERR_NOMEM;
    for (uint32_t id = 0; id < t->count; id++) {
        uint32_t i = (uint32_t)t->entries[id].hash & (n - 1);
        while (slots[i])
            i = (i + 1) & (n - 1);
        slots[i] = id + 1;
    }
    st_free(t->slots);
    t->slots = slots;
    t->nslots = n;
    return ST_OK;
}

/* Room for n + 1 bytes of text; returns where to copy, NULL on no memory. */
static char *text_room(st_strtab *t, size_t n)
{
    block *b = t->blocks;
    if (!b || b->cap - b->used < n + 1) {
        size_t cap = n + 1 > BLOCK_MIN ? n + 1 : BLOCK_MIN;
        block *nb = st_malloc(sizeof *nb + cap);
        if (!nb)
            return NULL;
        nb->used = 0;
        nb->cap = cap;
        if (b && n + 1 > BLOCK_MIN) {
            /* A big string gets its own block behind the current one, so
            ** the current block keeps filling. */
            nb->next = b->next;
            b->next = nb;
        } else {
            nb->next = b;
            t->blocks = nb;
        }
        b = nb;
    }
    char *at = b->data + b->used;
    b->used += n + 1;
    return at;
}

st_status st_strtab_intern(st_strtab *t, const char *s, size_t n, uint32_t *id,
                           int *added)
{
    *id = UINT32_MAX;
    if (added)
        *added = 0;
    uint64_t h = hash_bytes(s, n);
    uint32_t slot = probe(t, h, s, n);
    if (t->slots[slot]) {
        *id = t->slots[slot] - 1;
        return ST_OK;
    }
    if (t->count >= t->max_entries || n > t->max_bytes - t->bytes)
        return ST_ERR_LIMIT;
    if (t->count == t->cap) {
        uint32_t cap = t->cap ? (t->cap > UINT32_MAX / 2 ? UINT32_MAX - 1 : t->cap * 2) : 16;
        entry *e = st_realloc(t->entries, (size_t)cap * sizeof *e);
        if (!e)
            return ST_ERR_NOMEM;
        t->entries = e;
        t->cap = cap;
    }
    if ((uint64_t)(t->count + 1) * 2 > t->nslots) {
        st_status rc = grow_slots(t);
        if (rc != ST_OK)
            return rc;
        slot = probe(t, h, s, n);
    }
    char *text = text_room(t, n);
    if (!text)
        return ST_ERR_NOMEM;
    memcpy(text, s, n);
    text[n] = '\0';
    t->entries[t->count] = (entry){h, n, text};
    t->slots[slot] = t->count + 1;
    *id = t->count++;
    t->bytes += n;
    if (added)
        *added = 1;
    return ST_OK;
}

uint32_t st_strtab_count(const st_strtab *t)
{
    return t->count;
}

const char *st_strtab_get(const st_strtab *t, uint32_t id, size_t *n)
{
    if (id >= t->count)
        return NULL;
    if (n)
        *n = t->entries[id].len;
    return t->entries[id].text;
}
