/*
** bench/floor.c -- the floor of the geometry stage: the least a program
** must do to read, validate and index every footprint of a GeoPackage.
**
** Input:   FILE.gpkg [TABLE] -- the first features table of the file
**          (gpkg_contents, data_type 'features') unless TABLE is given.
** Output:  one line per phase on stdout:
**            floor read+validate  N features  W s wall  C s cpu  F/s
**            floor index+query    N features  W s wall  C s cpu  F/s
**            floor total          ...
**          'read+validate' steps through the table with sqlite3, skips each
**          blob's GeoPackage header, parses the WKB with GEOS and runs
**          GEOSisValid_r; 'index+query' inserts every envelope into a GEOS
**          STRtree and queries each envelope once (the tree is built at the
**          first query). This is the bare loop the issue measures the
**          geometry stage against: no measures, no repair, no attributes.
** Errors:  a file or statement error: message on stderr, exit 1; bad
**          usage: exit 2. A blob that does not parse is counted, not fatal.
** Limits:  the envelopes are held in memory (one GEOS point-free envelope
**          geometry per feature), as any index must.
**
** Built by `make bench` as $(BUILD)/bench/floor; not part of the library.
*/
#include <geos_c.h>
#include <sqlite3.h>
#include <stdarg.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

typedef struct clock_pair {
    double wall, cpu;
} clock_pair;

static clock_pair now(void)
{
    struct timespec w, c;
    clock_gettime(CLOCK_MONOTONIC, &w);
    clock_gettime(CLOCK_PROCESS_CPUTIME_ID, &c);
    return (clock_pair){w.tv_sec + w.tv_nsec * 1e-9, c.tv_sec + c.tv_nsec * 1e-9};
}

static void report(const char *phase, size_t n, clock_pair a, clock_pair b)
{
    double wall = b.wall - a.wall, cpu = b.cpu - a.cpu;
    printf("floor %-15s %9zu features %8.2f s wall %8.2f s cpu %10.0f features/s\n", phase, n,
           wall, cpu, wall > 0 ? (double)n / wall : 0.0);
}

static void geos_message(const char *fmt, ...)
{
    (void)fmt;   /* invalid geometries are expected; their messages are not needed */
}

/* Size of the GeoPackage binary header (GeoPackage 1.3, 2.1.3), or 0 when
** 'b' is not one. */
static size_t gpkg_header_size(const unsigned char *b, size_t n)
{
    static const size_t envelope_bytes[8] = {0, 32, 48, 48, 64, 0, 0, 0};
    if (n < 8 || b[0] != 'G' || b[1] != 'P')
        return 0;
    unsigned env = (b[3] >> 1) & 7u;
    if (env > 4)
        return 0;
    size_t h = 8 + envelope_bytes[env];
    return h <= n ? h : 0;
}

static int first_features_table(sqlite3 *db, char *out, size_t outlen)
{
    sqlite3_stmt *st = NULL;
    int ok = 0;
    if (sqlite3_prepare_v2(db, "SELECT table_name FROM gpkg_contents WHERE data_type = 'features' "
                               "ORDER BY rowid LIMIT 1", -1, &st, NULL) == SQLITE_OK &&
        sqlite3_step(st) == SQLITE_ROW) {
        snprintf(out, outlen, "%s", (const char *)sqlite3_column_text(st, 0));
        ok = 1;
    }
    sqlite3_finalize(st);
    return ok;
}

static int geometry_column(sqlite3 *db, const char *table, char *out, size_t outlen)
{
    sqlite3_stmt *st = NULL;
    int ok = 0;
    if (sqlite3_prepare_v2(db, "SELECT column_name FROM gpkg_geometry_columns WHERE table_name = ?",
                           -1, &st, NULL) == SQLITE_OK) {
        sqlite3_bind_text(st, 1, table, -1, SQLITE_STATIC);
        if (sqlite3_step(st) == SQLITE_ROW) {
            snprintf(out, outlen, "%s", (const char *)sqlite3_column_text(st, 0));
            ok = 1;
        }
    }
    sqlite3_finalize(st);
    return ok;
}

typedef struct envelopes {
    GEOSGeometry **items;
    size_t count, cap;
} envelopes;

static int push_envelope(envelopes *e, GEOSGeometry *g)
{
    if (e->count == e->cap) {
        size_t cap = e->cap ? e->cap * 2 : 4096;
        GEOSGeometry **a = realloc(e->items, cap * sizeof *a);
        if (!a)
            return 0;
        e->items = a;
        e->cap = cap;
    }
    e->items[e->count++] = g;
    return 1;
}

static void count_hit(void *item, void *ud)
{
    (void)item;
    ++*(size_t *)ud;
}

int main(int argc, char **argv)
{
    if (argc < 2 || argc > 3) {
        fprintf(stderr, "usage: floor FILE.gpkg [TABLE]\n");
        return 2;
    }
    sqlite3 *db = NULL;
    if (sqlite3_open_v2(argv[1], &db, SQLITE_OPEN_READONLY, NULL) != SQLITE_OK) {
        fprintf(stderr, "floor: %s: %s\n", argv[1], sqlite3_errmsg(db));
        sqlite3_close(db);
        return 1;
    }
    char table[512], column[512];
    if (argc == 3)
        snprintf(table, sizeof table, "%s", argv[2]);
    else if (!first_features_table(db, table, sizeof table)) {
        fprintf(stderr, "floor: %s: no features table\n", argv[1]);
        sqlite3_close(db);
        return 1;
    }
    if (!geometry_column(db, table, column, sizeof column)) {
        fprintf(stderr, "floor: %s: table '%s' has no geometry column\n", argv[1], table);
        sqlite3_close(db);
        return 1;
    }
    char *sql = sqlite3_mprintf("SELECT \"%w\" FROM \"%w\"", column, table);
    sqlite3_stmt *st = NULL;
    if (!sql || sqlite3_prepare_v2(db, sql, -1, &st, NULL) != SQLITE_OK) {
        fprintf(stderr, "floor: %s: %s\n", argv[1], sqlite3_errmsg(db));
        sqlite3_free(sql);
        sqlite3_close(db);
        return 1;
    }
    sqlite3_free(sql);

    GEOSContextHandle_t h = GEOS_init_r();
    GEOSContext_setErrorHandler_r(h, geos_message);
    GEOSContext_setNoticeHandler_r(h, geos_message);
    GEOSWKBReader *wkb = GEOSWKBReader_create_r(h);
    envelopes env = {NULL, 0, 0};
    size_t n = 0, valid = 0, unparsed = 0;
    int rc = 0;

    clock_pair t0 = now();
    while (sqlite3_step(st) == SQLITE_ROW) {
        n++;
        const unsigned char *b = sqlite3_column_blob(st, 0);
        size_t len = (size_t)sqlite3_column_bytes(st, 0);
        size_t hs = b ? gpkg_header_size(b, len) : 0;
        GEOSGeometry *g = hs ? GEOSWKBReader_read_r(h, wkb, b + hs, len - hs) : NULL;
        if (!g) {
            unparsed++;
            continue;
        }
        if (GEOSisValid_r(h, g) == 1)
            valid++;
        GEOSGeometry *e = GEOSEnvelope_r(h, g);
        GEOSGeom_destroy_r(h, g);
        if (e && !push_envelope(&env, e)) {
            GEOSGeom_destroy_r(h, e);
            fprintf(stderr, "floor: out of memory\n");
            rc = 1;
            break;
        }
    }
    clock_pair t1 = now();

    GEOSSTRtree *tree = GEOSSTRtree_create_r(h, 10);
    for (size_t i = 0; i < env.count; i++)
        GEOSSTRtree_insert_r(h, tree, env.items[i], env.items[i]);
    size_t hits = 0;
    for (size_t i = 0; i < env.count; i++)
        GEOSSTRtree_query_r(h, tree, env.items[i], count_hit, &hits);
    clock_pair t2 = now();

    report("read+validate", n, t0, t1);
    report("index+query", env.count, t1, t2);
    report("total", n, t0, t2);
    printf("floor valid %zu, unparsed %zu, candidate pairs %zu\n", valid, unparsed, hits);

    GEOSSTRtree_destroy_r(h, tree);
    for (size_t i = 0; i < env.count; i++)
        GEOSGeom_destroy_r(h, env.items[i]);
    free(env.items);
    GEOSWKBReader_destroy_r(h, wkb);
    GEOS_finish_r(h);
    sqlite3_finalize(st);
    sqlite3_close(db);
    return rc;
}
