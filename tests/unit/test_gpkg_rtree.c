/*
** tests/unit/test_gpkg_rtree.c -- the GeoPackage writer's bulk-loaded
** R-tree (io/gpkg_rtree.c), checked by SQLite's own rtree module:
**   - rtreecheck() (SQLite's ext/rtree integrity check: node sizes, every
**     child box inside its parent's, _rowid and _parent consistent) says
**     'ok' for trees of one, two and three levels;
**   - window queries through the rtree module return exactly the features
**     whose envelopes meet the window, counted by brute force here;
**   - the module can go on inserting into the packed tree (splits) and
**     deleting from it, and rtreecheck() still says 'ok';
**   - the outward rounding to float32 contains every double;
**   - the leaves hold the boxes in sort-tile-recursive order, exactly as
**     qsort() with the (centre, id) comparison sorts them;
**   - boxes handed over in any order, with dense or sparse ids, load into a
**     tree that rtreecheck() accepts and where every id finds its box.
*/
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <cmocka.h>

#include <math.h>
#include <sqlite3.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#include "stocktake/core.h"
#include "stocktake/feature.h"
#include "stocktake/io.h"
#include "io/ioInt.h"

/* A deterministic generator (Knuth's MMIX LCG), so failures replay. */
static double next_unit(uint64_t *s)
{
    *s = *s * 6364136223846793005ULL + 1442695040888963407ULL;
    return (double)(*s >> 11) / 9007199254740992.0;
}

typedef struct square {
    double x, y, size;
    int has_geom;
} square;

static st_feature *feature_of(const square *q, uint64_t i)
{
    st_feature *f = st_feature_new();
    assert_non_null(f);
    f->index = i;
    if (!q->has_geom)
        return f;   /* ST_GEOM_NULL */
    f->geom.type = ST_GEOM_POLYGON;
    assert_int_equal(st_geom_begin_part(&f->geom), ST_OK);
    assert_int_equal(st_geom_begin_ring(&f->geom), ST_OK);
    double c[5][2] = {{q->x, q->y}, {q->x + q->size, q->y}, {q->x + q->size, q->y + q->size},
                      {q->x, q->y + q->size}, {q->x, q->y}};
    for (int k = 0; k < 5; k++)
        assert_int_equal(st_geom_add_xy(&f->geom, c[k][0], c[k][1]), ST_OK);
    return f;
}

/* Write n squares (every 50th without a geometry; none at all with
** 'none') into 'path'. */
static square *write_squares(const char *path, size_t n, uint64_t seed, int none)
{
    square *qs = calloc(n, sizeof *qs);
    assert_non_null(qs);
    st_diags d;
    st_diags_init(&d);
    st_writer *w = NULL;
    assert_int_equal(st_writer_open(path, &d, &w), ST_OK);
    st_fields fl;
    st_fields_init(&fl);
    assert_int_equal(st_writer_begin_layer(w, "squares", &fl, ST_GEOM_POLYGON), ST_OK);
    for (size_t i = 0; i < n; i++) {
        qs[i].x = -126.3 + 0.05 * next_unit(&seed);
        qs[i].y = -47.95 + 0.04 * next_unit(&seed);
        qs[i].size = 1e-5 + 2e-4 * next_unit(&seed);
        qs[i].has_geom = !none && i % 50 != 7;
        st_feature *f = feature_of(&qs[i], i);
        assert_int_equal(st_writer_write(w, f), ST_OK);
        st_feature_free(f);
    }
    assert_int_equal(st_writer_end_layer(w), ST_OK);
    assert_int_equal(st_writer_commit(w), ST_OK);
    st_writer_close(w);
    st_fields_free(&fl);
    assert_int_equal(d.errors, 0);
    st_diags_free(&d);
    return qs;
}

static void expect_rtreecheck_ok(sqlite3 *db)
{
    sqlite3_stmt *s;
    assert_int_equal(sqlite3_prepare_v2(db, "SELECT rtreecheck('rtree_squares_geom')", -1, &s,
                                        NULL), SQLITE_OK);
    assert_int_equal(sqlite3_step(s), SQLITE_ROW);
    assert_string_equal((const char *)sqlite3_column_text(s, 0), "ok");
    sqlite3_finalize(s);
}

static long long scalar(sqlite3 *db, const char *sql)
{
    sqlite3_stmt *s;
    assert_int_equal(sqlite3_prepare_v2(db, sql, -1, &s, NULL), SQLITE_OK);
    assert_int_equal(sqlite3_step(s), SQLITE_ROW);
    long long v = sqlite3_column_int64(s, 0);
    sqlite3_finalize(s);
    return v;
}

/* Window queries through the rtree module against brute force: feature i
** has fid i + 1 (the writer's AUTOINCREMENT from an empty table). */
static void expect_queries_match(sqlite3 *db, const square *qs, size_t n, uint64_t seed)
{
    sqlite3_stmt *s;
    assert_int_equal(sqlite3_prepare_v2(db,
        "SELECT id FROM rtree_squares_geom WHERE maxx >= ?1 AND minx <= ?2 "
        "AND maxy >= ?3 AND miny <= ?4 ORDER BY id", -1, &s, NULL), SQLITE_OK);
    unsigned char *hit = calloc(n, 1);
    assert_non_null(hit);
    for (int k = 0; k < 200; k++) {
        double x0 = -126.3 + 0.05 * next_unit(&seed), y0 = -47.95 + 0.04 * next_unit(&seed);
        double w = 0.004 * next_unit(&seed), h = 0.004 * next_unit(&seed);
        /* the module compares the stored float32 bounds: so does the
        ** brute force below */
        memset(hit, 0, n);
        sqlite3_bind_double(s, 1, x0);
        sqlite3_bind_double(s, 2, x0 + w);
        sqlite3_bind_double(s, 3, y0);
        sqlite3_bind_double(s, 4, y0 + h);
        size_t got = 0;
        while (sqlite3_step(s) == SQLITE_ROW) {
            long long id = sqlite3_column_int64(s, 0);
            assert_true(id >= 1 && (size_t)id <= n);
            hit[id - 1] = 1;
            got++;
        }
        sqlite3_reset(s);
        size_t want = 0;
        for (size_t i = 0; i < n; i++) {
            if (!qs[i].has_geom)
                continue;
            float minx = st_gpkg_rtree_down(qs[i].x), maxx = st_gpkg_rtree_up(qs[i].x + qs[i].size);
            float miny = st_gpkg_rtree_down(qs[i].y), maxy = st_gpkg_rtree_up(qs[i].y + qs[i].size);
            int meets = maxx >= x0 && minx <= x0 + w && maxy >= y0 && miny <= y0 + h;
            want += (size_t)meets;
            if (meets != hit[i])
                fail_msg("window %d: feature %zu %s", k, i, meets ? "missed" : "extra");
        }
        assert_int_equal(got, want);
    }
    free(hit);
    sqlite3_finalize(s);
}

static void check_size(size_t n, int levels)
{
    char path[] = "/tmp/st_rtree_XXXXXX.gpkg";
    int fd = mkstemps(path, 5);
    assert_true(fd >= 0);
    close(fd);
    unlink(path);
    square *qs = write_squares(path, n, 42 + n, 0);
    sqlite3 *db;
    assert_int_equal(sqlite3_open(path, &db), SQLITE_OK);
    expect_rtreecheck_ok(db);
    size_t with_geom = 0;
    for (size_t i = 0; i < n; i++)
        with_geom += (size_t)qs[i].has_geom;
    assert_int_equal(scalar(db, "SELECT count(*) FROM rtree_squares_geom"), (long long)with_geom);
    assert_int_equal(scalar(db, "SELECT count(*) FROM rtree_squares_geom_rowid"),
                     (long long)with_geom);
    /* depth of the tree: the root's first two bytes (big-endian) */
    assert_int_equal(scalar(db, "SELECT (instr('0123456789ABCDEF', substr(hex(data), 3, 1)) - 1) "
                                "* 16 + instr('0123456789ABCDEF', substr(hex(data), 4, 1)) - 1 "
                                "FROM rtree_squares_geom_node WHERE nodeno = 1"),
                     levels - 1);
    expect_queries_match(db, qs, n, 7 + n);
    /* The module goes on: insert (with splits) and delete in the packed tree. */
    assert_int_equal(sqlite3_exec(db,
        "WITH RECURSIVE k(i) AS (SELECT 1 UNION ALL SELECT i + 1 FROM k WHERE i < 700) "
        "INSERT INTO rtree_squares_geom SELECT 1000000 + i, -126.3 + i * 0.00007, "
        "-126.3 + i * 0.00007 + 0.0001, -47.95, -47.9499 FROM k;"
        "DELETE FROM rtree_squares_geom WHERE id % 3 = 0;", NULL, NULL, NULL), SQLITE_OK);
    expect_rtreecheck_ok(db);
    sqlite3_close(db);
    unlink(path);
    free(qs);
}

static void test_one_leaf(void **state)
{
    (void)state;
    check_size(30, 1);          /* fewer than a node holds: the root is a leaf */
}

static void test_two_levels(void **state)
{
    (void)state;
    check_size(1000, 2);
}

static void test_three_levels(void **state)
{
    (void)state;
    check_size(6000, 3);        /* more than 51 * 51 boxes: three levels */
}

static void test_empty_layer(void **state)
{
    (void)state;
    char path[] = "/tmp/st_rtree_XXXXXX.gpkg";
    int fd = mkstemps(path, 5);
    assert_true(fd >= 0);
    close(fd);
    unlink(path);
    free(write_squares(path, 3, 7, 1));   /* no feature has a geometry */
    sqlite3 *db;
    assert_int_equal(sqlite3_open(path, &db), SQLITE_OK);
    expect_rtreecheck_ok(db);
    assert_int_equal(scalar(db, "SELECT count(*) FROM rtree_squares_geom"), 0);
    assert_int_equal(scalar(db, "SELECT count(*) FROM squares"), 3);
    sqlite3_close(db);
    unlink(path);
}

/* Load n boxes with ids id(i) in a scrambled order straight into an rtree
** table; the tree passes rtreecheck() and every id finds its own box. */
static void load_ids(size_t n, int64_t stride)
{
    sqlite3 *db;
    assert_int_equal(sqlite3_open(":memory:", &db), SQLITE_OK);
    assert_int_equal(sqlite3_exec(db, "CREATE VIRTUAL TABLE rtree_squares_geom USING "
                                      "rtree(id, minx, maxx, miny, maxy)", NULL, NULL, NULL),
                     SQLITE_OK);
    st_gpkg_box *boxes = calloc(n, sizeof *boxes);
    assert_non_null(boxes);
    uint64_t seed = 11 + n;
    for (size_t i = 0; i < n; i++) {
        size_t j = (i * 7919) % n;   /* n is not a multiple of 7919: a permutation */
        float x = (float)(10 * next_unit(&seed)), y = (float)(10 * next_unit(&seed));
        boxes[j] = (st_gpkg_box){1 + (int64_t)i * stride, {x, x + 0.01f, y, y + 0.02f}};
    }
    char err[256] = "";
    assert_int_equal(st_gpkg_rtree_load(db, "rtree_squares_geom", boxes, n, err, sizeof err),
                     ST_OK);
    expect_rtreecheck_ok(db);
    assert_int_equal(scalar(db, "SELECT count(*) FROM rtree_squares_geom_rowid"), (long long)n);
    sqlite3_stmt *s;
    assert_int_equal(sqlite3_prepare_v2(db, "SELECT minx, maxx, miny, maxy FROM "
                                            "rtree_squares_geom WHERE id = ?", -1, &s, NULL),
                     SQLITE_OK);
    for (size_t j = 0; j < n; j++) {
        sqlite3_bind_int64(s, 1, boxes[j].id);
        assert_int_equal(sqlite3_step(s), SQLITE_ROW);
        for (int k = 0; k < 4; k++)
            assert_true((float)sqlite3_column_double(s, k) == boxes[j].b[k]);
        sqlite3_reset(s);
    }
    sqlite3_finalize(s);
    free(boxes);
    sqlite3_close(db);
}

/* The _rowid rows are written in rowid order, found in linear time for
** dense ids (one layer's fids) and by sorting for sparse ones. */
static void test_dense_and_sparse_ids(void **state)
{
    (void)state;
    load_ids(3001, 1);      /* dense: ids 1..3001 */
    load_ids(3001, 5);      /* sparse: range 5 times the count */
    load_ids(63, 1);        /* fewer than one statement's rows */
}

/* The reference order, with qsort(): by the float sum of two bounds, then
** by id. */
static int ref_axis;
static int ref_cmp(const void *a, const void *b)
{
    const st_gpkg_box *p = a, *q = b;
    float x = p->b[ref_axis] + p->b[ref_axis + 1], y = q->b[ref_axis] + q->b[ref_axis + 1];
    if (x != y)
        return x < y ? -1 : 1;
    return (p->id > q->id) - (p->id < q->id);
}

/* The leaves hold the boxes in sort-tile-recursive order: sorted by x
** centre, then slices of ceil(sqrt(leaves)) leaves each sorted by y centre,
** ties by id (here many: centres on a coarse grid), exactly as qsort()
** with that comparison orders them. */
static void test_packing_order(void **state)
{
    (void)state;
    const size_t n = 20011;
    sqlite3 *db;
    assert_int_equal(sqlite3_open(":memory:", &db), SQLITE_OK);
    assert_int_equal(sqlite3_exec(db, "CREATE VIRTUAL TABLE rtree_squares_geom USING "
                                      "rtree(id, minx, maxx, miny, maxy)", NULL, NULL, NULL),
                     SQLITE_OK);
    st_gpkg_box *boxes = calloc(n, sizeof *boxes), *want = calloc(n, sizeof *want);
    assert_non_null(boxes);
    assert_non_null(want);
    uint64_t seed = 5;
    for (size_t i = 0; i < n; i++) {
        float x = (float)(int)(40 * next_unit(&seed)), y = (float)(int)(40 * next_unit(&seed));
        float w = i % 3 ? 0.5f : 0.25f;   /* x - w + x + w ties often; so do centres */
        boxes[i] = (st_gpkg_box){(int64_t)((i * 7919) % n) + 1, {x - w, x + w, y - 1, y + 1}};
    }
    memcpy(want, boxes, n * sizeof *want);
    char err[256] = "";
    assert_int_equal(st_gpkg_rtree_load(db, "rtree_squares_geom", boxes, n, err, sizeof err),
                     ST_OK);
    expect_rtreecheck_ok(db);
    long long node_bytes = scalar(db, "SELECT length(data) FROM rtree_squares_geom_node "
                                      "WHERE nodeno = 1");
    size_t cap = (size_t)(node_bytes - 4) / 24;
    size_t leaves = (n + cap - 1) / cap;
    size_t per_slice = (size_t)ceil(sqrt((double)leaves)) * cap;
    ref_axis = 0;
    qsort(want, n, sizeof *want, ref_cmp);
    ref_axis = 2;
    for (size_t at = 0; at < n; at += per_slice)
        qsort(want + at, n - at < per_slice ? n - at : per_slice, sizeof *want, ref_cmp);
    /* the leaves in node order, their cells in order */
    sqlite3_stmt *s;
    assert_int_equal(sqlite3_prepare_v2(db, "SELECT data FROM rtree_squares_geom_node WHERE "
                                            "nodeno IN (SELECT nodeno FROM "
                                            "rtree_squares_geom_rowid) ORDER BY nodeno",
                                        -1, &s, NULL), SQLITE_OK);
    size_t k = 0, nleaves = 0;
    while (sqlite3_step(s) == SQLITE_ROW) {
        const unsigned char *b = sqlite3_column_blob(s, 0);
        size_t m = (size_t)b[2] << 8 | b[3];
        nleaves++;
        for (size_t c = 0; c < m; c++, k++) {
            int64_t id = 0;
            for (int j = 0; j < 8; j++)
                id = id << 8 | b[4 + 24 * c + (size_t)j];
            assert_true(k < n);
            if (id != want[k].id)
                fail_msg("cell %zu holds id %lld, want %lld", k, (long long)id,
                         (long long)want[k].id);
        }
    }
    sqlite3_finalize(s);
    assert_int_equal(k, n);
    assert_int_equal(nleaves, leaves);
    free(boxes);
    free(want);
    sqlite3_close(db);
}

static void test_rounding_contains(void **state)
{
    (void)state;
    uint64_t seed = 3;
    for (int i = 0; i < 100000; i++) {
        double d = (next_unit(&seed) - 0.5) * 360.0;
        assert_true((double)st_gpkg_rtree_down(d) <= d);
        assert_true((double)st_gpkg_rtree_up(d) >= d);
        assert_true(fabs((double)st_gpkg_rtree_up(d) - d) <= fabs(d) * 1.2e-7);
    }
    assert_true(st_gpkg_rtree_down(0.5) == 0.5f);   /* exact floats stay */
    assert_true(st_gpkg_rtree_up(-0.25) == -0.25f);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_one_leaf),
        cmocka_unit_test(test_two_levels),
        cmocka_unit_test(test_three_levels),
        cmocka_unit_test(test_empty_layer),
        cmocka_unit_test(test_dense_and_sparse_ids),
        cmocka_unit_test(test_packing_order),
        cmocka_unit_test(test_rounding_contains),
    };
    return cmocka_run_group_tests_name("gpkg_rtree", tests, NULL, NULL);
}
