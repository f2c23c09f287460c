/*
** tests/unit/test_write_rows.c -- st_writer_write_rows: rows filled on
** demand and, for a GeoPackage, prepared on helper threads while one
** thread inserts them, many rows a statement.
**   - the GeoPackage is the same byte for byte as the one written row by
**     row with st_writer_write, for 1, 2, 3 and 8 threads (a polygon
**     layer with NULL, single and multi geometries and values of every
**     type, some that do not parse; a point layer built in the row's
**     point; an attribute table), and holds what was written;
**   - the first failing row stops the write with the same status and
**     diagnostic for any number of threads, and nothing is left behind;
**   - allocation failures give ST_ERR_NOMEM and no file, with and without
**     helpers;
**   - other formats (GeoJSON) write the same file as row by row.
*/
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <cmocka.h>

#include <dirent.h>
#include <math.h>
#include <sqlite3.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>

#include "stocktake/core.h"
#include "stocktake/feature.h"
#include "stocktake/io.h"
#include "io/ioInt.h"
#include "scratch.h"

#define NROWS 2500
#define NCOLS 5

static const char *const col_names[NCOLS] = {"name", "n", "x", "flag", "note"};
static const st_field_type col_types[NCOLS] = {ST_FIELD_TEXT, ST_FIELD_INTEGER, ST_FIELD_REAL,
                                               ST_FIELD_BOOLEAN, ST_FIELD_TEXT};

/* The rows' shared data: one geometry per row (read only by the fills). */
typedef struct rows {
    st_geom geom[NROWS];
    size_t n;
    size_t fail_at;          /* the fill fails here with ST_ERR_FORMAT (n: never) */
    size_t line_at;          /* a linestring here, which no polygon layer takes */
} rows;

static void square(st_geom *g, double x, double y, double size)
{
    assert_int_equal(st_geom_begin_part(g), ST_OK);
    assert_int_equal(st_geom_begin_ring(g), ST_OK);
    const double c[5][2] = {{x, y}, {x + size, y}, {x + size, y + size}, {x, y + size}, {x, y}};
    for (int k = 0; k < 5; k++)
        assert_int_equal(st_geom_add_xy(g, c[k][0], c[k][1]), ST_OK);
}

static void rows_make(rows *r, size_t n)
{
    memset(r, 0, sizeof *r);
    r->n = n;
    r->fail_at = r->line_at = n;
    for (size_t k = 0; k < n; k++) {
        st_geom *g = &r->geom[k];
        st_geom_init(g);
        double x = 8.0 + 0.001 * (double)(k % 97), y = 47.0 + 0.001 * (double)(k / 97);
        if (k % 10 == 3)
            continue;                                  /* no geometry */
        if (k % 17 == 0) {
            g->type = ST_GEOM_MULTIPOLYGON;
            square(g, x, y, 0.0002);
            square(g, x + 0.0004, y, 0.0001);
        } else {
            g->type = ST_GEOM_POLYGON;                 /* into a MULTIPOLYGON layer */
            square(g, x, y, 0.0001 + 0.00001 * (double)(k % 5));
        }
    }
}

static void rows_free(rows *r)
{
    for (size_t k = 0; k < r->n; k++)
        st_geom_clear(&r->geom[k]);
}

/* Append a NUL-terminated text to the row's text; returns its offset. */
static size_t put_text(st_buf *t, const char *s, st_status *rc)
{
    size_t at = t->len;
    if (*rc == ST_OK)
        *rc = st_buf_append(t, s, strlen(s) + 1);
    return at;
}

static st_status fill_polygon_row(void *ctx, size_t k, st_row *row)
{
    const rows *r = ctx;
    if (k == r->fail_at)
        return ST_ERR_FORMAT;
    st_buf *t = &row->text;
    st_status rc = ST_OK;
    char s[64];
    snprintf(s, sizeof s, "b-%zu", k);
    size_t name = put_text(t, s, &rc);
    snprintf(s, sizeof s, "%zu", k * 3);
    size_t num = put_text(t, k % 11 == 0 ? "n/a" : s, &rc);     /* n/a stays text */
    char x[ST_FMT_FIXED_MAX];
    st_fmt_fixed(x, (double)k * 0.37, 2);
    size_t real = put_text(t, k % 13 == 0 ? "12 m" : x, &rc);
    if (rc != ST_OK)
        return rc;
    char **v = row->f.values;
    v[0] = t->data + name;
    v[1] = k % 7 == 0 ? NULL : t->data + num;
    v[2] = t->data + real;
    static const char *const flags[] = {"true", "0", "maybe", NULL};
    v[3] = (char *)flags[k % 4];
    v[4] = (char *)(k % 3 == 0 ? "Кронштадт — ação" : "plain");
    row->f.index = k;
    row->f.geom = r->geom[k];   /* borrowed view */
    if (k == r->line_at)
        row->f.geom.type = ST_GEOM_LINESTRING;
    return ST_OK;
}

static st_status fill_point_row(void *ctx, size_t k, st_row *row)
{
    (void)ctx;
    st_buf *t = &row->text;
    st_status rc = ST_OK;
    char s[32];
    snprintf(s, sizeof s, "%zu", k);
    size_t id = put_text(t, s, &rc);
    st_geom_reset(&row->point);
    if (rc == ST_OK && k % 9 != 4) {   /* every ninth without a point */
        row->point.type = ST_GEOM_POINT;
        rc = st_geom_add_xy(&row->point, 8.0 + 1e-4 * (double)k, 47.0 - 1e-4 * (double)k);
    }
    if (rc != ST_OK)
        return rc;
    row->f.values[0] = t->data + id;
    row->f.values[1] = (char *)(k % 2 ? "warning" : "note");
    row->f.geom = row->point;
    return ST_OK;
}

static st_status fill_table_row(void *ctx, size_t k, st_row *row)
{
    (void)ctx;
    st_status rc = ST_OK;
    char s[32];
    snprintf(s, sizeof s, "%zu", k * k);
    size_t at = put_text(&row->text, s, &rc);
    if (rc != ST_OK)
        return rc;
    row->f.values[0] = (char *)"key";
    row->f.values[1] = row->text.data + at;
    return ST_OK;
}

/* Row by row through st_writer_write (nthreads 0), or st_writer_write_rows. */
static st_status write_layer(st_writer *w, const char *name, const char *const *names,
                             const st_field_type *types, uint32_t ncols, st_geom_type type,
                             st_row_fill fill, void *ctx, size_t n, unsigned nthreads)
{
    st_fields fl;
    st_fields_init(&fl);
    st_status rc = ST_OK;
    for (uint32_t i = 0; rc == ST_OK && i < ncols; i++)
        rc = st_fields_add(&fl, names[i], types[i], 0, 0, NULL);
    if (rc == ST_OK)
        rc = st_writer_begin_layer(w, name, &fl, type);
    if (rc == ST_OK && nthreads > 0) {
        rc = st_writer_write_rows(w, n, fill, ctx, nthreads);
    } else if (rc == ST_OK) {
        st_row row;
        rc = st_writer_row_init(&row, ncols);
        for (size_t k = 0; rc == ST_OK && k < n; k++) {
            rc = st_writer_row_fill(&row, fill, ctx, k);
            if (rc == ST_OK)
                rc = st_writer_write(w, &row.f);
        }
        st_writer_row_free(&row);
    }
    if (rc == ST_OK)
        rc = st_writer_end_layer(w);
    st_fields_free(&fl);
    return rc;
}

/* The three layers into 'path'; 0 threads: row by row. */
static st_status write_file(const char *path, rows *r, size_t npoints, unsigned nthreads,
                            st_diags *d)
{
    static const char *const point_names[] = {"id", "severity"};
    static const st_field_type point_types[] = {ST_FIELD_INTEGER, ST_FIELD_TEXT};
    static const char *const table_names[] = {"key", "value"};
    static const st_field_type table_types[] = {ST_FIELD_TEXT, ST_FIELD_INTEGER};
    st_writer *w = NULL;
    st_status rc = st_writer_open(path, d, &w);
    if (rc != ST_OK)
        return rc;
    rc = write_layer(w, "buildings", col_names, col_types, NCOLS, ST_GEOM_MULTIPOLYGON,
                     fill_polygon_row, r, r->n, nthreads);
    if (rc == ST_OK)
        rc = write_layer(w, "findings", point_names, point_types, 2, ST_GEOM_POINT,
                         fill_point_row, NULL, npoints, nthreads);
    if (rc == ST_OK)
        rc = write_layer(w, "run_info", table_names, table_types, 2, ST_GEOM_NULL,
                         fill_table_row, NULL, 40, nthreads);
    if (rc == ST_OK)
        rc = st_writer_commit(w);
    st_writer_close(w);
    return rc;
}

typedef struct fixture {
    char dir[64];
    rows r;
} fixture;

static int setup(void **state)
{
    fixture *fx = calloc(1, sizeof *fx);
    if (!fx)
        return -1;
    snprintf(fx->dir, sizeof fx->dir, "/tmp/st-rows-XXXXXX");
    if (!mkdtemp(fx->dir))
        return -1;
    setenv("SOURCE_DATE_EPOCH", "1", 1);   /* gpkg_contents.last_change */
    rows_make(&fx->r, NROWS);
    *state = fx;
    return 0;
}

static int teardown(void **state)
{
    fixture *fx = *state;
    rows_free(&fx->r);
    int rc = scratch_remove(fx->dir);
    free(fx);
    return rc;
}

static unsigned char *slurp(const char *path, size_t *n)
{
    FILE *f = fopen(path, "rb");
    assert_non_null(f);
    assert_int_equal(fseek(f, 0, SEEK_END), 0);
    long len = ftell(f);
    assert_true(len > 0);
    rewind(f);
    unsigned char *b = malloc((size_t)len);
    assert_non_null(b);
    assert_int_equal(fread(b, 1, (size_t)len, f), (size_t)len);
    fclose(f);
    *n = (size_t)len;
    return b;
}

static void assert_same_file(const char *a, const char *b)
{
    size_t na, nb;
    unsigned char *x = slurp(a, &na), *y = slurp(b, &nb);
    assert_int_equal(na, nb);
    if (memcmp(x, y, na) != 0)
        fail_msg("%s and %s differ", a, b);
    free(x);
    free(y);
}

static int count_entries(const char *dir)
{
    DIR *d = opendir(dir);
    assert_non_null(d);
    int n = 0;
    for (struct dirent *e; (e = readdir(d));)
        n += e->d_name[0] != '.' || (e->d_name[1] && strcmp(e->d_name, ".."));
    closedir(d);
    return n;
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

static void test_gpkg_same_for_any_threads(void **state)
{
    fixture *fx = *state;
    char ref[128], path[128];
    snprintf(ref, sizeof ref, "%s/ref.gpkg", fx->dir);
    st_diags d;
    st_diags_init(&d);
    assert_int_equal(write_file(ref, &fx->r, 1000, 0, &d), ST_OK);
    static const unsigned threads[] = {1, 2, 3, 8};
    for (size_t i = 0; i < sizeof threads / sizeof threads[0]; i++) {
        snprintf(path, sizeof path, "%s/t%u.gpkg", fx->dir, threads[i]);
        assert_int_equal(write_file(path, &fx->r, 1000, threads[i], &d), ST_OK);
        assert_same_file(ref, path);
    }
    assert_int_equal(d.count, 0);
    st_diags_free(&d);

    /* and the file holds what was written */
    sqlite3 *db;
    assert_int_equal(sqlite3_open_v2(path, &db, SQLITE_OPEN_READONLY, NULL), SQLITE_OK);
    assert_int_equal(scalar(db, "SELECT count(*) FROM buildings"), NROWS);
    assert_int_equal(scalar(db, "SELECT count(*) FROM buildings WHERE geom IS NULL"), NROWS / 10);
    assert_int_equal(scalar(db, "SELECT count(*) FROM rtree_buildings_geom"),
                     NROWS - NROWS / 10);
    assert_int_equal(scalar(db, "SELECT max(fid) FROM buildings"), NROWS);
    assert_int_equal(scalar(db, "SELECT count(*) FROM buildings b JOIN rtree_buildings_geom r "
                                "ON r.id = b.fid WHERE b.name != 'b-' || (b.fid - 1)"), 0);
    assert_int_equal(scalar(db, "SELECT typeof(n) = 'text' AND n = 'n/a' FROM buildings "
                                "WHERE fid = 12"), 1);
    assert_int_equal(scalar(db, "SELECT n FROM buildings WHERE fid = 6"), 15);
    assert_int_equal(scalar(db, "SELECT x = 0.37 FROM buildings WHERE fid = 2"), 1);
    assert_int_equal(scalar(db, "SELECT x = '12 m' FROM buildings WHERE fid = 14"), 1);
    assert_int_equal(scalar(db, "SELECT count(*) FROM buildings WHERE flag = 1"), NROWS / 4);
    assert_int_equal(scalar(db, "SELECT count(*) FROM findings WHERE geom IS NOT NULL"),
                     1000 - 111);
    assert_int_equal(scalar(db, "SELECT count(*) FROM rtree_findings_geom"), 1000 - 111);
    assert_int_equal(scalar(db, "SELECT sum(value) FROM run_info"), 39 * 40 * 79 / 6);
    sqlite3_stmt *s;
    assert_int_equal(sqlite3_prepare_v2(db, "SELECT rtreecheck('rtree_buildings_geom')", -1,
                                        &s, NULL), SQLITE_OK);
    assert_int_equal(sqlite3_step(s), SQLITE_ROW);
    assert_string_equal((const char *)sqlite3_column_text(s, 0), "ok");
    sqlite3_finalize(s);
    sqlite3_close(db);
}

/* The first bad row decides, whatever the threads: the fill's own failure
** or a geometry the layer cannot take, named by its feature. */
static void test_first_failure_wins(void **state)
{
    fixture *fx = *state;
    char path[128], sub[96];
    snprintf(sub, sizeof sub, "%s/fail", fx->dir);
    assert_int_equal(mkdir(sub, 0700), 0);
    snprintf(path, sizeof path, "%s/out.gpkg", sub);
    static const unsigned threads[] = {0, 1, 2, 4};
    for (int pass = 0; pass < 3; pass++) {
        fx->r.fail_at = pass == 1 ? NROWS : 1500;   /* pass 0: the fill fails */
        fx->r.line_at = pass == 0 ? NROWS : 900;    /* 1, 2: the line at 900 */
        for (size_t i = 0; i < sizeof threads / sizeof threads[0]; i++) {
            st_diags d;
            st_diags_init(&d);
            st_status rc = write_file(path, &fx->r, 10, threads[i], &d);
            if (pass == 0) {
                assert_int_equal(rc, ST_ERR_FORMAT);
                assert_int_equal(d.count, 0);
            } else {
                assert_int_equal(rc, ST_ERR_USAGE);
                assert_int_equal(d.count, 1);
                assert_string_equal(d.items[0].message, "layer 'buildings' is declared "
                                                        "MULTIPOLYGON; feature 900 is a "
                                                        "LINESTRING");
            }
            st_diags_free(&d);
            assert_int_equal(count_entries(sub), 0);
        }
    }
    fx->r.fail_at = fx->r.line_at = NROWS;
}

static void nomem_loop(fixture *fx, unsigned nthreads)
{
    char path[128], sub[96];
    snprintf(sub, sizeof sub, "%s/nomem%u", fx->dir, nthreads);
    assert_int_equal(mkdir(sub, 0700), 0);
    snprintf(path, sizeof path, "%s/out.gpkg", sub);
    rows small;
    rows_make(&small, 600);
    long n;
    for (n = 1; n < 100000; n++) {
        st_diags d;
        st_diags_init(&d);
        st_alloc_fail_after(n);
        st_status rc = write_file(path, &small, 300, nthreads, &d);
        long used = st_alloc_count();
        st_alloc_fail_after(0);
        st_diags_free(&d);
        if (rc == ST_OK) {
            assert_true(used < n);
            break;
        }
        if (rc != ST_ERR_NOMEM)
            fail_msg("allocation %ld failed: status %d", n, rc);
        assert_int_equal(count_entries(sub), 0);
    }
    rows_free(&small);
    assert_true(n > 20);
    assert_int_equal(count_entries(sub), 1);
}

static void test_nomem_alone(void **state)
{
    nomem_loop(*state, 1);
}

static void test_nomem_with_helpers(void **state)
{
    nomem_loop(*state, 2);   /* the helpers' own allocations are not counted */
}

static void test_geojson_same_as_row_by_row(void **state)
{
    fixture *fx = *state;
    char a[128], b[128];
    st_diags d;
    st_diags_init(&d);
    for (unsigned t = 0; t <= 2; t += 2) {
        snprintf(a, sizeof a, "%s/rows%u.geojson", fx->dir, t);
        st_writer *w = NULL;
        assert_int_equal(st_writer_open(a, &d, &w), ST_OK);
        assert_int_equal(write_layer(w, "buildings", col_names, col_types, NCOLS,
                                     ST_GEOM_MULTIPOLYGON, fill_polygon_row, &fx->r, 300, t),
                         ST_OK);
        assert_int_equal(st_writer_commit(w), ST_OK);
        st_writer_close(w);
    }
    snprintf(a, sizeof a, "%s/rows0.geojson", fx->dir);
    snprintf(b, sizeof b, "%s/rows2.geojson", fx->dir);
    assert_same_file(a, b);
    assert_int_equal(d.count, 0);
    st_diags_free(&d);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_gpkg_same_for_any_threads),
        cmocka_unit_test(test_first_failure_wins),
        cmocka_unit_test(test_nomem_alone),
        cmocka_unit_test(test_nomem_with_helpers),
        cmocka_unit_test(test_geojson_same_as_row_by_row),
    };
    return cmocka_run_group_tests_name("write_rows", tests, setup, teardown);
}
