/*
** audit/reference.c -- the reference counts CSV: expected buildings per
** district, from a census, a survey or an estimate.
**
** Input:   a CSV file (csvread.h): a header row, whatever its names; then
**          the district key in column 1 and the expected count in column 2;
**          further columns (year, method, source ...) are allowed and
**          ignored.
** Output:  an st_reference: (key, count) rows in file order.
** Errors:  ST_ERR_FORMAT with "file:line:" for a row with fewer than two
**          cells, an empty key, a count that is not a whole number >= 0, a
**          key given twice, a file with no header; the CSV reader's errors.
** Limits:  ST_AUDIT_MAX_REFERENCE_BYTES, ST_PLACE_MAX_DISTRICTS rows.
*/
#include <errno.h>
#include <stdlib.h>
#include <string.h>

#include "stocktake/audit.h"
#include "stocktake/csvread.h"
#include "stocktake/strtab.h"

struct st_reference {
    st_strtab *keys;      /* key -> row */
    uint64_t *count;
    size_t n, cap;
};

typedef struct rstate {
    st_reference *r;
    const char *path;
    st_diags *diags;
    int seen_header;
} rstate;

static st_status bad(rstate *s, long line, const char *what, const char *cell)
{
    st_loc loc = ST_LOC_LINE(s->path, line, 0, 0);
    return st_diags_add(s->diags, ST_SEV_ERROR, ST_ERR_FORMAT, &loc, "%s%s%s%s", what,
                        cell ? " '" : "", cell ? cell : "", cell ? "'" : "");
}

/* A whole number >= 0 written in decimal digits only. */
static int parse_count(const char *s, uint64_t *out)
{
    if (!s[0])
        return 0;
    for (const char *p = s; *p; p++)
        if (*p < '0' || *p > '9')
            return 0;
    errno = 0;
    unsigned long long v = strtoull(s, NULL, 10);
    if (errno)
        return 0;
    *out = v;
    return 1;
}

static st_status row(void *ud, long line, char *const *cells, size_t n)
{
    rstate *s = ud;
    if (!s->seen_header) {
        s->seen_header = 1;
        return n >= 2 ? ST_OK : bad(s, line, "the header needs at least two columns "
                                             "(district key, expected count)", NULL);
    }
    st_reference *r = s->r;
    if (n < 2)
        return bad(s, line, "a row needs a district key and an expected count", NULL);
    if (!cells[0][0])
        return bad(s, line, "empty district key", NULL);
    uint64_t count;
    if (!parse_count(cells[1], &count))
        return bad(s, line, "expected count is not a whole number >= 0:", cells[1]);
    if (r->n == ST_PLACE_MAX_DISTRICTS) {
        st_loc loc = ST_LOC_LINE(s->path, line, 0, 0);
        return st_diags_add(s->diags, ST_SEV_ERROR, ST_ERR_LIMIT, &loc, "more than %u rows",
                            ST_PLACE_MAX_DISTRICTS);
    }
    uint32_t id;
    int added = 0;
    st_status rc = st_strtab_intern(r->keys, cells[0], strlen(cells[0]), &id, &added);
    if (rc != ST_OK)
        return rc;
    if (!added)
        return bad(s, line, "district key given twice:", cells[0]);
    if (r->n == r->cap) {
        size_t cap = r->cap ? 2 * r->cap : 64;
        uint64_t *a = st_realloc(r->count, cap * sizeof *a);
        if (!a)
            return ST_ERR_NOMEM;
        r->count = a;
        r->cap = cap;
    }
    r->count[r->n++] = count;
    return ST_OK;
}

st_status st_reference_load(const char *path, st_diags *diags, st_reference **out)
{
    *out = NULL;
    st_reference *r = st_calloc(1, sizeof *r);
    if (!r)
        return ST_ERR_NOMEM;
    rstate s = {r, path, diags, 0};
    r->keys = st_strtab_new(ST_PLACE_MAX_DISTRICTS, 0);
    st_status rc = r->keys ? ST_OK : ST_ERR_NOMEM;
    if (rc == ST_OK)
        rc = st_csv_read(path, ST_AUDIT_MAX_REFERENCE_BYTES, row, &s, diags);
    if (rc == ST_OK && !s.seen_header) {
        st_loc loc = ST_LOC_FILE(path);
        rc = st_diags_add(diags, ST_SEV_ERROR, ST_ERR_FORMAT, &loc,
                          "empty: a reference file needs a header row, then one row a district");
    }
    if (rc != ST_OK) {
        if (rc == ST_ERR_NOMEM)
            st_diags_add(diags, ST_SEV_ERROR, rc, NULL, "out of memory reading %s", path);
        st_reference_free(r);
        return rc;
    }
    *out = r;
    return ST_OK;
}

void st_reference_free(st_reference *r)
{
    if (!r)
        return;
    st_strtab_free(r->keys);
    st_free(r->count);
    st_free(r);
}

size_t st_reference_count(const st_reference *r) { return r->n; }

const char *st_reference_key(const st_reference *r, size_t i, uint64_t *count)
{
    if (count)
        *count = r->count[i];
    return st_strtab_get(r->keys, (uint32_t)i, NULL);
}
