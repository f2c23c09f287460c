/*
** stocktake/strtab.h -- a string table: each distinct byte string gets a
** small dense id (0, 1, 2, ... in the order first seen), found again in
** expected constant time. For counting values (inspect's per-field top
** values), interning names, and finding duplicates by key.
**
** Strings are copied into blocks the table owns, so the caller's buffer
** can be reused at once; they may contain NUL bytes (the length counts).
** Limits are explicit: at most 'max_entries' strings and 'max_bytes' bytes
** of string text; a new string beyond either is ST_ERR_LIMIT and the table
** stays usable for lookups and for strings it already holds.
** Not thread-safe: one table per thread, or the caller's own lock.
*/
#ifndef STOCKTAKE_STRTAB_H
#define STOCKTAKE_STRTAB_H

#include <stddef.h>
#include <stdint.h>

#include "stocktake/core.h"

typedef struct st_strtab st_strtab;

/* Returns owned empty table (NULL on no memory); free with st_strtab_free.
** 0 for a limit means the largest the table can index (UINT32_MAX - 1
** entries, SIZE_MAX bytes). */
st_strtab *st_strtab_new(uint32_t max_entries, size_t max_bytes);
void st_strtab_free(st_strtab *t);

/*
** Find s[0..n) (borrowed) or add a copy. *id gets its index; *added (may be
** NULL) is 1 when it was new. ST_ERR_LIMIT when it is new and a limit is
** reached, ST_ERR_NOMEM when memory runs out; in both cases the table is
** unchanged and *id is UINT32_MAX.
*/
st_status st_strtab_intern(st_strtab *t, const char *s, size_t n, uint32_t *id,
                           int *added) ST_MUST_CHECK;
/* 1 and *id when s[0..n) is in the table, else 0. */
int st_strtab_find(const st_strtab *t, const char *s, size_t n, uint32_t *id);
/* Number of strings held. */
uint32_t st_strtab_count(const st_strtab *t);
/* String 'id' (borrowed, NUL-terminated, valid until the table is freed);
** its length in *n when n is not NULL. */
const char *st_strtab_get(const st_strtab *t, uint32_t id, size_t *n);

#endif
