/*
** io/gpkg_rtree.c -- bulk load of a GeoPackage layer's R-tree index: the
** tree is packed in memory (sort-tile-recursive) and its nodes written
** straight into the three tables behind SQLite's rtree module.
**
** Why: inserting rows one by one through the rtree module costs about
** 10-20 microseconds a feature (choose-subtree, splits, forced
** reinserts): for a million footprints, longer than everything else the
** writer does. A packed tree is built in O(n log n) with a few sorts and
** written as plain rows, sorted by key.
**
** Input:   the SQLite connection holding the layer, the name of the rtree
**          virtual table (already created, empty) and the boxes of the
**          layer's features: id = fid, float bounds rounded outward.
** Output:  the rows of <name>_node, <name>_rowid and <name>_parent, in the
**          format of SQLite's ext/rtree/rtree.c (a node: 2-byte big-endian
**          depth of the tree, used in the root only; 2-byte cell count;
**          cells of an 8-byte big-endian id -- rowid in a leaf, child node
**          number above -- and four big-endian 32-bit floats minx, maxx,
**          miny, maxy). The root is node 1, as the module expects; every
**          blob has the length of the root the module created. SQLite's own
**          rtreecheck() accepts the result (tested).
** Errors:  ST_ERR_NOMEM; ST_ERR_IO with SQLite's message in 'err'.
** Limits:  boxes must be finite; ids are fids (positive).
*/
#include <math.h>
#include <sqlite3.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "ioInt.h"

#define CELL_BYTES 24          /* 8-byte id + 4 float32 bounds (2-D) */

/* One entry of a level: a box and what it points to (a fid in the leaves,
** the index of a node of the level below otherwise). */
typedef struct item {
    float b[4];                /* minx, maxx, miny, maxy */
    int64_t id;
} item;

typedef struct level {
    item *items;               /* in packing order: node k holds items
                                  [k*cap, min((k+1)*cap, n)) */
    size_t n;
    size_t nodes;
    int64_t base;              /* node number of node 0 of this level */
} level;

float st_gpkg_rtree_down(double d)
{
    float f = (float)d;
    return (double)f > d ? nextafterf(f, -INFINITY) : f;
}

float st_gpkg_rtree_up(double d)
{
    float f = (float)d;
    return (double)f < d ? nextafterf(f, INFINITY) : f;
}

/* 1 if p sorts before q on 'axis' (0: x, 2: y): by the float sum of the
** two bounds (twice the centre), then by id. Ids are unique in a level, so
** the order is total and any correct sort gives the same one. */
static inline int before(const item *p, const item *q, int axis)
{
    float x = p->b[axis] + p->b[axis + 1], y = q->b[axis] + q->b[axis + 1];
    if (x != y)
        return x < y;
    return p->id < q->id;
}

static inline void swap_items(item *a, item *b)
{
    item t = *a;
    *a = *b;
    *b = t;
}

static void sift_down(item *v, size_t root, size_t n, int axis)
{
    for (size_t child; (child = 2 * root + 1) < n; root = child) {
        if (child + 1 < n && before(&v[child], &v[child + 1], axis))
            child++;
        if (!before(&v[root], &v[child], axis))
            return;
        swap_items(&v[root], &v[child]);
    }
}

static void heap_sort(item *v, size_t n, int axis)
{
    for (size_t i = n / 2; i-- > 0;)
        sift_down(v, i, n, axis);
    for (size_t end = n; end-- > 1;) {
        swap_items(&v[0], &v[end]);
        sift_down(v, 0, end, axis);
    }
}

/* Introsort: quicksort (median of three, Hoare's partition) down to short
** runs finished by insertion, heapsort past a depth limit. In place, with
** the comparison inlined: several times faster than qsort() here, and
** without its temporary copy of the array (the write's peak memory). */
static void sort_items(item *v, size_t n, int axis, int depth)
{
    while (n > 16) {
        if (depth-- == 0) {
            heap_sort(v, n, axis);
            return;
        }
        size_t m = n / 2;
        if (before(&v[m], &v[0], axis))
            swap_items(&v[m], &v[0]);
        if (before(&v[n - 1], &v[m], axis)) {
            swap_items(&v[n - 1], &v[m]);
            if (before(&v[m], &v[0], axis))
                swap_items(&v[m], &v[0]);
        }
        item pivot = v[m];
        size_t i = 0, j = n - 1;
        for (;;) {
            while (before(&v[i], &pivot, axis))
                i++;
            while (before(&pivot, &v[j], axis))
                j--;
            if (i >= j)
                break;
            swap_items(&v[i++], &v[j--]);
        }
        /* [0, j] before or at the pivot, [j + 1, n) after: recurse into
        ** the smaller side, loop on the larger */
        size_t left = j + 1;
        if (left < n - left) {
            sort_items(v, left, axis, depth);
            v += left;
            n -= left;
        } else {
            sort_items(v + left, n - left, axis, depth);
            n = left;
        }
    }
    for (size_t i = 1; i < n; i++) {
        item t = v[i];
        size_t k = i;
        for (; k > 0 && before(&t, &v[k - 1], axis); k--)
            v[k] = v[k - 1];
        v[k] = t;
    }
}

static void sort_on(item *v, size_t n, int axis)
{
    int depth = 0;
    for (size_t k = n; k > 1; k >>= 1)
        depth += 2;
    sort_items(v, n, axis, depth);
}

/* Sort-tile-recursive order: vertical slices by x, each sorted by y, so
** that each run of 'cap' items is a compact tile. */
static void str_order(item *v, size_t n, size_t cap)
{
    size_t nodes = (n + cap - 1) / cap;
    size_t slices = (size_t)ceil(sqrt((double)nodes));
    size_t per_slice = slices * cap;
    sort_on(v, n, 0);
    for (size_t s = 0; s < n; s += per_slice)
        sort_on(v + s, n - s < per_slice ? n - s : per_slice, 2);
}

/* The next level up: one item per node of 'below', its box the union. */
static st_status parent_level(const level *below, size_t cap, level *up)
{
    up->n = below->nodes;
    up->items = st_malloc(up->n * sizeof *up->items);
    if (!up->items)
        return ST_ERR_NOMEM;
    for (size_t k = 0; k < below->nodes; k++) {
        const item *c = below->items + k * cap;
        size_t m = below->n - k * cap < cap ? below->n - k * cap : cap;
        item u = {{c[0].b[0], c[0].b[1], c[0].b[2], c[0].b[3]}, (int64_t)k};
        for (size_t i = 1; i < m; i++) {
            u.b[0] = fminf(u.b[0], c[i].b[0]);
            u.b[1] = fmaxf(u.b[1], c[i].b[1]);
            u.b[2] = fminf(u.b[2], c[i].b[2]);
            u.b[3] = fmaxf(u.b[3], c[i].b[3]);
        }
        up->items[k] = u;
    }
    str_order(up->items, up->n, cap);
    up->nodes = (up->n + cap - 1) / cap;
    return ST_OK;
}

static void put_be64(unsigned char *p, uint64_t v)
{
    for (int i = 7; i >= 0; i--, v >>= 8)
        p[i] = (unsigned char)(v & 0xFF);
}

static void put_be_float(unsigned char *p, float f)
{
    uint32_t u;
    memcpy(&u, &f, sizeof u);
    for (int i = 3; i >= 0; i--, u >>= 8)
        p[i] = (unsigned char)(u & 0xFF);
}

/* <name>_rowid rows a statement inserts (one statement a row cost more
** than the row; the table is the same either way). */
#define ROWIDS_PER_INSERT 64

typedef struct loader {
    sqlite3 *db;
    sqlite3_stmt *node, *parent, *rowid, *rowids;   /* rowids: ROWIDS_PER_INSERT rows */
    char *err;
    size_t errlen;
} loader;

static st_status sql_fail(loader *L, const char *what)
{
    snprintf(L->err, L->errlen, "%s: %s", what, sqlite3_errmsg(L->db));
    return ST_ERR_IO;
}

static st_status step(loader *L, sqlite3_stmt *s, const char *what)
{
    int c = sqlite3_step(s);
    sqlite3_reset(s);
    return c == SQLITE_DONE ? ST_OK : sql_fail(L, what);
}

static st_status prepare(loader *L, const char *fmt, const char *name, sqlite3_stmt **s)
{
    char *sql = sqlite3_mprintf(fmt, name);
    if (!sql)
        return ST_ERR_NOMEM;
    int c = sqlite3_prepare_v2(L->db, sql, -1, s, NULL);
    sqlite3_free(sql);
    return c == SQLITE_OK ? ST_OK : sql_fail(L, "preparing the R-tree load");
}

/* Write node k of level 'lv' (children numbered from 'child_base'). */
static st_status write_node(loader *L, const level *lv, size_t k, size_t cap, int depth,
                            int64_t child_base, int64_t parent_no, unsigned char *blob,
                            size_t node_bytes)
{
    const item *c = lv->items + k * cap;
    size_t m = lv->n - k * cap < cap ? lv->n - k * cap : cap;
    int64_t no = lv->base + (int64_t)k;
    memset(blob, 0, node_bytes);
    blob[0] = (unsigned char)(depth >> 8);
    blob[1] = (unsigned char)(depth & 0xFF);
    blob[2] = (unsigned char)(m >> 8);
    blob[3] = (unsigned char)(m & 0xFF);
    for (size_t i = 0; i < m; i++) {
        unsigned char *p = blob + 4 + i * CELL_BYTES;
        put_be64(p, (uint64_t)(child_base >= 0 ? child_base + c[i].id : c[i].id));
        for (int j = 0; j < 4; j++)
            put_be_float(p + 8 + 4 * j, c[i].b[j]);
    }
    sqlite3_bind_int64(L->node, 1, no);
    sqlite3_bind_blob(L->node, 2, blob, (int)node_bytes, SQLITE_STATIC);
    st_status rc = step(L, L->node, "writing an R-tree node");
    if (rc == ST_OK && parent_no > 0) {
        sqlite3_bind_int64(L->parent, 1, no);
        sqlite3_bind_int64(L->parent, 2, parent_no);
        rc = step(L, L->parent, "writing an R-tree parent");
    }
    return rc;
}

typedef struct rowid_pair {
    int64_t rowid, node;
} rowid_pair;

static int by_rowid(const void *a, const void *b)
{
    const rowid_pair *p = a, *q = b;
    return (p->rowid > q->rowid) - (p->rowid < q->rowid);
}

/* The (rowid, leaf node) pairs of the leaves in rowid order. Rows are
** numbered densely (fids of one layer), so a table indexed by rowid sorts
** them in linear time; a sparse or odd range falls back to qsort. */
static rowid_pair *rowids_in_order(const level *leaves, size_t cap)
{
    size_t n = leaves->n;
    rowid_pair *v = st_malloc(n * sizeof *v);
    if (!v)
        return NULL;
    int64_t lo = INT64_MAX, hi = INT64_MIN;
    for (size_t i = 0; i < n; i++) {
        int64_t id = leaves->items[i].id;
        lo = id < lo ? id : lo;
        hi = id > hi ? id : hi;
    }
    uint64_t range = (uint64_t)hi - (uint64_t)lo + 1;
    int dense = range <= 2 * (uint64_t)n;
    int64_t *node = dense ? st_calloc((size_t)range, sizeof *node) : NULL;
    if (dense && !node) {
        st_free(v);
        return NULL;
    }
    for (size_t i = 0; dense && i < n; i++) {
        int64_t *at = &node[leaves->items[i].id - lo];
        dense = *at == 0;   /* node numbers start at 1; a repeated id: sort */
        *at = leaves->base + (int64_t)(i / cap);
    }
    if (dense) {
        size_t k = 0;
        for (uint64_t r = 0; r < range; r++)
            if (node[r])
                v[k++] = (rowid_pair){lo + (int64_t)r, node[r]};
    } else {
        for (size_t i = 0; i < n; i++)
            v[i] = (rowid_pair){leaves->items[i].id, leaves->base + (int64_t)(i / cap)};
        qsort(v, n, sizeof *v, by_rowid);
    }
    st_free(node);
    return v;
}

/* <name>_rowid rows in rowid order (a B-tree likes its keys ascending),
** ROWIDS_PER_INSERT a statement while that many are left. */
static st_status write_rowids(loader *L, const level *leaves, size_t cap)
{
    rowid_pair *v = rowids_in_order(leaves, cap);
    if (!v)
        return ST_ERR_NOMEM;
    st_status rc = ST_OK;
    for (size_t i = 0; rc == ST_OK && i < leaves->n;) {
        size_t m = leaves->n - i >= ROWIDS_PER_INSERT ? ROWIDS_PER_INSERT : 1;
        sqlite3_stmt *s = m > 1 ? L->rowids : L->rowid;
        for (size_t k = 0; k < m; k++) {
            sqlite3_bind_int64(s, (int)(2 * k + 1), v[i + k].rowid);
            sqlite3_bind_int64(s, (int)(2 * k + 2), v[i + k].node);
        }
        rc = step(L, s, "writing an R-tree rowid");
        i += m;
    }
    st_free(v);
    return rc;
}

/* The insert of ROWIDS_PER_INSERT rowid rows. */
static st_status prepare_rowids(loader *L, const char *name)
{
    st_buf sql;
    st_buf_init(&sql, 0);
    st_status rc = st_buf_puts(&sql, "INSERT INTO \"%w_rowid\" (rowid, nodeno) VALUES (?, ?)");
    for (int i = 1; rc == ST_OK && i < ROWIDS_PER_INSERT; i++)
        rc = st_buf_puts(&sql, ", (?, ?)");
    if (rc == ST_OK)
        rc = prepare(L, sql.data, name, &L->rowids);
    st_buf_free(&sql);
    return rc;
}

/* Node blob length of the tree: that of the (empty) root the module made. */
static st_status node_size(loader *L, const char *name, size_t *out)
{
    sqlite3_stmt *s = NULL;
    st_status rc = prepare(L, "SELECT length(data) FROM \"%w_node\" WHERE nodeno = 1", name, &s);
    if (rc == ST_OK) {
        if (sqlite3_step(s) == SQLITE_ROW)
            *out = (size_t)sqlite3_column_int64(s, 0);
        else
            rc = sql_fail(L, "reading the R-tree root");
    }
    sqlite3_finalize(s);
    if (rc == ST_OK && (*out < 4 + 2 * CELL_BYTES || *out > 65536)) {
        snprintf(L->err, L->errlen, "unexpected R-tree node size %zu", *out);
        rc = ST_ERR_IO;
    }
    return rc;
}

static st_status write_levels(loader *L, level *lv, int nlv, size_t cap, size_t node_bytes)
{
    /* Number the nodes from the root down: the root is node 1. */
    int64_t next = 1;
    for (int d = nlv - 1; d >= 0; d--) {
        lv[d].base = next;
        next += (int64_t)lv[d].nodes;
    }
    unsigned char *blob = st_malloc(node_bytes);
    int64_t *parent = st_malloc((lv[0].nodes + 1) * sizeof *parent);
    st_status rc = blob && parent ? ST_OK : ST_ERR_NOMEM;
    for (int d = nlv - 1; rc == ST_OK && d >= 0; d--) {
        /* The parent of node k of level d is the node of level d+1 whose
        ** item has id k (0 for the root). */
        for (size_t k = 0; k < lv[d].nodes; k++)
            parent[k] = 0;
        for (size_t i = 0; d + 1 < nlv && i < lv[d + 1].n; i++)
            parent[lv[d + 1].items[i].id] = lv[d + 1].base + (int64_t)(i / cap);
        for (size_t k = 0; rc == ST_OK && k < lv[d].nodes; k++)
            rc = write_node(L, &lv[d], k, cap, d == nlv - 1 ? nlv - 1 : 0,
                            d > 0 ? lv[d - 1].base : -1, parent[k], blob, node_bytes);
    }
    st_free(blob);
    st_free(parent);
    if (rc == ST_OK)
        rc = write_rowids(L, &lv[0], cap);
    return rc;
}

st_status st_gpkg_rtree_load(sqlite3 *db, const char *name, st_gpkg_box *boxes, size_t n,
                             char *err, size_t errlen)
{
    if (n == 0)
        return ST_OK;   /* the empty root the module made is the whole tree */
    loader L = {db, NULL, NULL, NULL, NULL, err, errlen};
    size_t node_bytes = 0;
    st_status rc = node_size(&L, name, &node_bytes);
    size_t cap = (node_bytes - 4) / CELL_BYTES;
    /* Levels: leaves first. A tree of n items has fewer than 64 levels. */
    level lv[64];
    int nlv = 0;
    memset(lv, 0, sizeof lv);
    if (rc == ST_OK) {
        lv[0].n = n;
        lv[0].items = st_malloc(n * sizeof *lv[0].items);
        rc = lv[0].items ? ST_OK : ST_ERR_NOMEM;
    }
    if (rc == ST_OK) {
        for (size_t i = 0; i < n; i++)
            lv[0].items[i] = (item){{boxes[i].b[0], boxes[i].b[1], boxes[i].b[2], boxes[i].b[3]},
                                    boxes[i].id};
        str_order(lv[0].items, n, cap);
        lv[0].nodes = (n + cap - 1) / cap;
        nlv = 1;
        while (rc == ST_OK && lv[nlv - 1].nodes > 1 && nlv < 64) {
            rc = parent_level(&lv[nlv - 1], cap, &lv[nlv]);
            nlv++;
        }
    }
    if (rc == ST_OK)
        rc = prepare(&L, "INSERT OR REPLACE INTO \"%w_node\" (nodeno, data) VALUES (?, ?)", name,
                     &L.node);
    if (rc == ST_OK)
        rc = prepare(&L, "INSERT INTO \"%w_parent\" (nodeno, parentnode) VALUES (?, ?)", name,
                     &L.parent);
    if (rc == ST_OK)
        rc = prepare(&L, "INSERT INTO \"%w_rowid\" (rowid, nodeno) VALUES (?, ?)", name, &L.rowid);
    if (rc == ST_OK)
        rc = prepare_rowids(&L, name);
    if (rc == ST_OK)
        rc = write_levels(&L, lv, nlv, cap, node_bytes);
    sqlite3_finalize(L.node);
    sqlite3_finalize(L.parent);
    sqlite3_finalize(L.rowid);
    sqlite3_finalize(L.rowids);
    for (int d = 0; d < nlv; d++)
        st_free(lv[d].items);
    return rc;
}
