/*
** tests/unit/test_place.c -- the district layer and placement: generated
** grids of square districts with points and buildings exactly on shared
** edges and corners (placed once, by the lowest district index), interior
** and outside points, the same result for any number of threads, invalid
** district polygons repaired, features sharing a key merged, the key
** chosen without --district-key, bad layers refused, allocation failures.
**
** Coordinates are multiples of 1/8 degree, exact in binary, so a point
** "on the border" is exactly on it. The independent check against
** geopandas sjoin, on real extracts and on a generated grid, is
** tests/ref/test_place_sjoin.sh.
*/
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>
#include <cmocka.h>

#include "stocktake/place.h"
#include "scratch.h"

static char tmpdir[256];

static char *write_file(const char *name, const char *text)
{
    static char path[512];
    snprintf(path, sizeof path, "%s/%s", tmpdir, name);
    FILE *fp = fopen(path, "w");
    assert_non_null(fp);
    fputs(text, fp);
    fclose(fp);
    return path;
}

/* A GeoJSON grid of nx * ny unit squares (side 'step' degrees) from (x0, y0);
** keys "Dxy"; region "R<x/2>"; written in the order given by 'reverse'. */
static char *grid_file(const char *name, int nx, int ny, double x0, double y0, double step,
                       int reverse)
{
    size_t cap = 4096 + (size_t)nx * (size_t)ny * 400;
    char *text = malloc(cap);
    assert_non_null(text);
    size_t len = (size_t)snprintf(text, cap, "{\"type\":\"FeatureCollection\",\"features\":[");
    int n = nx * ny;
    for (int k = 0; k < n; k++) {
        int i = reverse ? n - 1 - k : k;
        int x = i % nx, y = i / nx;
        double a = x0 + x * step, b = y0 + y * step, c = a + step, d = b + step;
        len += (size_t)snprintf(text + len, cap - len,
                                "%s{\"type\":\"Feature\",\"properties\":{\"note\":\"grid\","
                                "\"code\":\"D%d%d\",\"reg\":\"R%d\"},\"geometry\":{\"type\":"
                                "\"Polygon\",\"coordinates\":[[[%.17g,%.17g],[%.17g,%.17g],"
                                "[%.17g,%.17g],[%.17g,%.17g],[%.17g,%.17g]]]}}",
                                k ? "," : "", x, y, x / 2, a, b, c, b, c, d, a, d, a, b);
    }
    snprintf(text + len, cap - len, "]}");
    char *p = write_file(name, text);
    free(text);
    return p;
}

static st_districts *load(const char *path, const char *key, const char *region, st_status want)
{
    st_districts_options o = {path, key, region, NULL};
    st_diags d;
    st_diags_init(&d);
    st_districts *ds = NULL;
    st_status rc = st_districts_load(&o, &d, &ds);
    if (rc != want && d.count)
        fprintf(stderr, "diag: %s\n", d.items[0].message);
    assert_int_equal(rc, want);
    st_diags_free(&d);
    return ds;
}

static int32_t place_at(st_placer *p, double x, double y)
{
    int32_t id = -2;
    assert_int_equal(st_placer_point(p, x, y, &id), ST_OK);
    return id;
}

static void test_grid_points(void **state)
{
    (void)state;
    st_districts *d = load(grid_file("grid.geojson", 3, 2, 10, 20, 0.125, 0), "code", "reg", ST_OK);
    assert_int_equal(st_districts_count(d), 6);
    assert_string_equal(st_districts_get(d, 4)->key, "D11");
    assert_string_equal(st_districts_get(d, 4)->region, "R0");
    assert_string_equal(st_districts_get(d, 2)->region, "R1");
    assert_int_equal(st_districts_find(d, "D21"), 5);
    assert_int_equal(st_districts_find(d, "nope"), -1);
    st_geos *gx = st_geos_new();
    st_placer *p = NULL;
    st_diags dg;
    st_diags_init(&dg);
    assert_int_equal(st_placer_new(d, gx, &dg, &p), ST_OK);
    /* interior points: district (x, y) is index y * 3 + x */
    for (int y = 0; y < 2; y++)
        for (int x = 0; x < 3; x++)
            assert_int_equal(place_at(p, 10 + 0.0625 + x * 0.125, 20 + 0.0625 + y * 0.125),
                             y * 3 + x);
    /* on the edge between D00 (0) and D10 (1): the lower index */
    assert_int_equal(place_at(p, 10.125, 20.0625), 0);
    /* edge between D10 (1) and D11 (4) */
    assert_int_equal(place_at(p, 10.1875, 20.125), 1);
    /* corner shared by 0, 1, 3, 4 */
    assert_int_equal(place_at(p, 10.125, 20.125), 0);
    /* corner shared by 1, 2, 4, 5 */
    assert_int_equal(place_at(p, 10.25, 20.125), 1);
    /* on the outer boundary: covered, so inside */
    assert_int_equal(place_at(p, 10.375, 20.0625), 2);
    /* outside */
    assert_int_equal(place_at(p, 9.9, 20.0625), -1);
    assert_int_equal(place_at(p, 10.0625, 20.26), -1);
    st_placer_free(p);
    st_geos_free(gx);
    st_diags_free(&dg);
    st_districts_free(d);
}

/* The same grid written in reverse order: the border goes to the district
** read first, so the rule follows the layer's order, as documented. */
static void test_border_follows_layer_order(void **state)
{
    (void)state;
    st_districts *d = load(grid_file("rev.geojson", 3, 2, 10, 20, 0.125, 1), "code", NULL, ST_OK);
    assert_string_equal(st_districts_get(d, 0)->key, "D21");
    assert_null(st_districts_get(d, 0)->region);
    st_geos *gx = st_geos_new();
    st_placer *p = NULL;
    st_diags dg;
    st_diags_init(&dg);
    assert_int_equal(st_placer_new(d, gx, &dg, &p), ST_OK);
    int32_t id = place_at(p, 10.125, 20.0625);     /* D00 | D10 */
    assert_string_equal(st_districts_get(d, (size_t)id)->key, "D10");
    id = place_at(p, 10.125, 20.125);              /* corner of D00 D10 D01 D11 */
    assert_string_equal(st_districts_get(d, (size_t)id)->key, "D11");
    st_placer_free(p);
    st_geos_free(gx);
    st_diags_free(&dg);
    st_districts_free(d);
}

/* A square footprint of half-side h (degrees) centred on (cx, cy). */
static st_feature *square(uint64_t bid, double cx, double cy, double h, st_feature_status st)
{
    st_feature *f = st_feature_new();
    assert_non_null(f);
    f->bid = bid;
    f->status = st;
    f->geom.type = ST_GEOM_POLYGON;
    assert_int_equal(st_geom_begin_part(&f->geom), ST_OK);
    assert_int_equal(st_geom_begin_ring(&f->geom), ST_OK);
    double xy[] = {cx - h, cy - h, cx + h, cy - h, cx + h, cy + h, cx - h, cy + h, cx - h, cy - h};
    for (int i = 0; i < 5; i++)
        assert_int_equal(st_geom_add_xy(&f->geom, xy[2 * i], xy[2 * i + 1]), ST_OK);
    return f;
}

/* Many buildings centred on edges, corners and interiors of a 10 x 10
** grid, placed with 1 and with 4 threads: same districts, same findings,
** and each on-border building in the lowest-index district covering it. */
static void test_threads_and_borders(void **state)
{
    (void)state;
    st_districts *d = load(grid_file("g10.geojson", 10, 10, -5, 40, 0.125, 0), "code", NULL, ST_OK);
    enum { N = 6000 };
    st_feature **fs = calloc(N, sizeof *fs);
    int32_t *want = calloc(N, sizeof *want);
    assert_non_null(fs);
    assert_non_null(want);
    for (size_t i = 0; i < N; i++) {
        /* positions on a 1/16-degree lattice: even = edge or corner */
        int gx = (int)(i * 7 % 23), gy = (int)(i * 11 % 23);  /* 0..22, beyond the grid at 21+ */
        double cx = -5 + gx / 16.0, cy = 40 + gy / 16.0;
        fs[i] = square(i + 1, cx, cy, 1.0 / 256,
                       i % 13 == 0 ? ST_STATUS_DUPLICATE : ST_STATUS_OK);
        /* expected: the lowest index among the cells that touch the point */
        int best = -1;
        for (int y = 0; y < 10; y++)
            for (int x = 0; x < 10; x++) {
                double a = -5 + x * 0.125, b = 40 + y * 0.125;
                if (cx >= a && cx <= a + 0.125 && cy >= b && cy <= b + 0.125 &&
                    (best < 0 || y * 10 + x < best))
                    best = y * 10 + x;
            }
        want[i] = best;
    }
    st_findings one, four;
    st_findings_init(&one);
    st_findings_init(&four);
    st_diags dg;
    st_diags_init(&dg);
    st_place_stats s1, s4;
    assert_int_equal(st_place_features(d, fs, N, 1, ST_SEV_WARNING, &one, &dg, &s1), ST_OK);
    for (size_t i = 0; i < N; i++) {
        assert_int_equal(fs[i]->district, want[i]);
        fs[i]->district = -7;
    }
    assert_int_equal(st_place_features(d, fs, N, 4, ST_SEV_WARNING, &four, &dg, &s4), ST_OK);
    size_t outside = 0, border = 0;
    for (size_t i = 0; i < N; i++) {
        assert_int_equal(fs[i]->district, want[i]);
        int gx = (int)(i * 7 % 23), gy = (int)(i * 11 % 23);
        border += want[i] >= 0 && (gx % 2 == 0 || gy % 2 == 0);
        outside += want[i] < 0 && fs[i]->status == ST_STATUS_OK;
    }
    assert_true(border > 1000);              /* the test does exercise borders */
    assert_true(outside > 100);
    assert_int_equal(s1.outside, outside);
    assert_int_equal(s4.outside, outside);
    assert_int_equal(s1.placed, s4.placed);
    assert_int_equal(s1.aside_placed, s4.aside_placed);
    assert_true(s1.aside_placed > 0);
    assert_int_equal(one.count, outside);
    assert_int_equal(four.count, outside);
    for (size_t k = 0; k < one.count; k++) {
        assert_int_equal(one.items[k].bid, four.items[k].bid);
        assert_string_equal(one.items[k].code, ST_FINDING_PLACE_OUTSIDE);
        assert_int_equal(one.items[k].severity, ST_SEV_WARNING);
        assert_string_equal(one.items[k].message, four.items[k].message);
        assert_int_equal(fs[one.items[k].bid - 1]->district, -1);
    }
    for (size_t i = 0; i < N; i++)
        st_feature_free(fs[i]);
    free(fs);
    free(want);
    st_findings_free(&one);
    st_findings_free(&four);
    st_diags_free(&dg);
    st_districts_free(d);
}

/* A bow-tie district is repaired (two triangles meeting at (0.5 0.5)) and
** said so; a point in either lobe is placed in it. */
static void test_invalid_district_repaired(void **state)
{
    (void)state;
    const char *path = write_file(
        "bow.geojson",
        "{\"type\":\"FeatureCollection\",\"features\":["
        "{\"type\":\"Feature\",\"properties\":{\"k\":\"BOW\"},\"geometry\":{\"type\":\"Polygon\","
        "\"coordinates\":[[[0,0],[1,1],[1,0],[0,1],[0,0]]]}},"
        "{\"type\":\"Feature\",\"properties\":{\"k\":\"OK\"},\"geometry\":{\"type\":\"Polygon\","
        "\"coordinates\":[[[2,0],[3,0],[3,1],[2,1],[2,0]]]}}]}");
    st_districts_options o = {path, "k", NULL, NULL};
    st_diags dg;
    st_diags_init(&dg);
    st_districts *d = NULL;
    assert_int_equal(st_districts_load(&o, &dg, &d), ST_OK);
    assert_int_equal(st_districts_repaired(d), 1);
    assert_non_null(st_districts_get(d, 0)->repair);
    assert_non_null(strstr(st_districts_get(d, 0)->repair, "Self-intersection"));
    assert_null(st_districts_get(d, 1)->repair);
    assert_int_equal(st_districts_get(d, 0)->geom.type, ST_GEOM_MULTIPOLYGON);
    assert_int_equal(dg.warnings, 1);
    assert_non_null(strstr(dg.items[0].message, "GEOSMakeValid"));
    st_geos *gx = st_geos_new();
    st_placer *p = NULL;
    assert_int_equal(st_placer_new(d, gx, &dg, &p), ST_OK);
    assert_int_equal(place_at(p, 0.5, 0.25), -1);   /* between the lobes */
    assert_int_equal(place_at(p, 0.5, 0.75), -1);
    assert_int_equal(place_at(p, 0.5, 0.5), 0);     /* where they touch */
    assert_int_equal(place_at(p, 0.1, 0.5), 0);
    assert_int_equal(place_at(p, 0.9, 0.5), 0);
    assert_int_equal(place_at(p, 2.5, 0.5), 1);
    st_placer_free(p);
    st_geos_free(gx);
    st_diags_free(&dg);
    st_districts_free(d);
}

/* Two features with one key make one district; without --district-key the
** first field filled with distinct values is the key ('note' is the same
** everywhere, so 'code' is chosen). */
static void test_merge_and_auto_key(void **state)
{
    (void)state;
    st_districts *d = load(grid_file("auto.geojson", 2, 2, 0, 0, 0.125, 0), NULL, NULL, ST_OK);
    assert_string_equal(st_districts_key_field(d), "code");
    assert_null(st_districts_region_field(d));
    st_districts_free(d);

    const char *path = write_file(
        "twice.geojson",
        "{\"type\":\"FeatureCollection\",\"features\":["
        "{\"type\":\"Feature\",\"properties\":{\"k\":\"A\"},\"geometry\":{\"type\":\"Polygon\","
        "\"coordinates\":[[[0,0],[1,0],[1,1],[0,1],[0,0]]]}},"
        "{\"type\":\"Feature\",\"properties\":{\"k\":\"B\"},\"geometry\":{\"type\":\"Polygon\","
        "\"coordinates\":[[[1,0],[2,0],[2,1],[1,1],[1,0]]]}},"
        "{\"type\":\"Feature\",\"properties\":{\"k\":\"A\"},\"geometry\":{\"type\":\"Polygon\","
        "\"coordinates\":[[[5,0],[6,0],[6,1],[5,1],[5,0]]]}}]}");
    d = load(path, "k", NULL, ST_OK);
    assert_int_equal(st_districts_count(d), 2);
    assert_int_equal(st_districts_get(d, 0)->nfeatures, 2);
    assert_int_equal(st_districts_get(d, 0)->geom.nparts, 2);
    st_geos *gx = st_geos_new();
    st_placer *p = NULL;
    st_diags dg;
    st_diags_init(&dg);
    assert_int_equal(st_placer_new(d, gx, &dg, &p), ST_OK);
    assert_int_equal(place_at(p, 5.5, 0.5), 0);
    assert_int_equal(place_at(p, 1.5, 0.5), 1);
    assert_int_equal(place_at(p, 1.0, 0.5), 0);   /* shared edge: A read first */
    st_placer_free(p);
    st_geos_free(gx);
    st_diags_free(&dg);
    st_districts_free(d);
}

static void test_bad_layers(void **state)
{
    (void)state;
    const char *g = grid_file("bad.geojson", 2, 1, 0, 0, 1, 0);
    assert_null(load(g, "nope", NULL, ST_ERR_USAGE));
    assert_null(load(g, "code", "nope", ST_ERR_USAGE));
    /* no key field fits: every field repeats or is missing somewhere */
    const char *p = write_file(
        "nokey.geojson",
        "{\"type\":\"FeatureCollection\",\"features\":["
        "{\"type\":\"Feature\",\"properties\":{\"k\":\"A\"},\"geometry\":{\"type\":\"Polygon\","
        "\"coordinates\":[[[0,0],[1,0],[1,1],[0,1],[0,0]]]}},"
        "{\"type\":\"Feature\",\"properties\":{\"k\":null},\"geometry\":{\"type\":\"Polygon\","
        "\"coordinates\":[[[1,0],[2,0],[2,1],[1,1],[1,0]]]}}]}");
    assert_null(load(p, NULL, NULL, ST_ERR_USAGE));
    assert_null(load(p, "k", NULL, ST_ERR_FORMAT));      /* feature 1 has no key */
    p = write_file("reserved.geojson",
                   "{\"type\":\"FeatureCollection\",\"features\":["
                   "{\"type\":\"Feature\",\"properties\":{\"k\":\"none\"},\"geometry\":{\"type\":"
                   "\"Polygon\",\"coordinates\":[[[0,0],[1,0],[1,1],[0,1],[0,0]]]}}]}");
    assert_null(load(p, "k", NULL, ST_ERR_USAGE));
    p = write_file("line.geojson",
                   "{\"type\":\"FeatureCollection\",\"features\":["
                   "{\"type\":\"Feature\",\"properties\":{\"k\":\"L\"},\"geometry\":{\"type\":"
                   "\"LineString\",\"coordinates\":[[0,0],[1,0]]}}]}");
    assert_null(load(p, "k", NULL, ST_ERR_FORMAT));
    assert_null(load("/nonexistent/districts.geojson", "k", NULL, ST_ERR_IO));
    /* a district without geometry is kept (and warned about): it holds no building */
    p = write_file("nogeom.geojson",
                   "{\"type\":\"FeatureCollection\",\"features\":["
                   "{\"type\":\"Feature\",\"properties\":{\"k\":\"E\"},\"geometry\":null}]}");
    st_districts *d = load(p, "k", NULL, ST_OK);
    assert_int_equal(st_districts_count(d), 1);
    st_geos *gx = st_geos_new();
    st_placer *pl = NULL;
    st_diags dg;
    st_diags_init(&dg);
    assert_int_equal(st_placer_new(d, gx, &dg, &pl), ST_OK);
    assert_int_equal(place_at(pl, 0.5, 0.5), -1);
    st_placer_free(pl);
    st_geos_free(gx);
    st_diags_free(&dg);
    st_districts_free(d);
}

/* A footprint GEOS cannot take a point on surface of, and one without
** coordinates. */
static void test_anchor(void **state)
{
    (void)state;
    st_districts *d = load(grid_file("a.geojson", 1, 1, 0, 0, 1, 0), "code", NULL, ST_OK);
    st_geos *gx = st_geos_new();
    st_placer *p = NULL;
    st_diags dg;
    st_diags_init(&dg);
    assert_int_equal(st_placer_new(d, gx, &dg, &p), ST_OK);
    st_feature *f = square(1, 0.5, 0.5, 0.25, ST_STATUS_OK);
    double xy[2];
    assert_true(st_placer_anchor(p, &f->geom, xy));
    assert_true(xy[0] > 0.25 && xy[0] < 0.75 && xy[1] > 0.25 && xy[1] < 0.75);
    /* unclosed ring: GEOS refuses it, the bounding-box centre is used */
    f->geom.xy[8] = 0.3;
    assert_true(st_placer_anchor(p, &f->geom, xy));
    assert_true(xy[0] > 0.24 && xy[0] < 0.76);
    st_feature *empty = st_feature_new();
    assert_false(st_placer_anchor(p, &empty->geom, xy));
    st_feature *fs[2] = {f, empty};
    st_findings out;
    st_findings_init(&out);
    st_place_stats s;
    assert_int_equal(st_place_features(d, fs, 2, 1, ST_SEV_NOTE, &out, &dg, &s), ST_OK);
    assert_int_equal(s.unplaceable, 1);
    assert_int_equal(s.placed, 1);
    assert_int_equal(empty->district, -1);
    assert_int_equal(out.count, 0);       /* no finding without a position */
    st_feature_free(f);
    st_feature_free(empty);
    st_findings_free(&out);
    st_placer_free(p);
    st_geos_free(gx);
    st_diags_free(&dg);
    st_districts_free(d);
}

/* Every allocation failure while loading and placing returns an error
** and leaks nothing (ASan/valgrind). */
static void test_alloc_failures(void **state)
{
    (void)state;
    const char *path = grid_file("oom.geojson", 3, 3, 0, 0, 0.125, 0);
    st_feature *fs[3] = {square(1, 0.0625, 0.0625, 0.01, ST_STATUS_OK),
                         square(2, 0.125, 0.125, 0.01, ST_STATUS_OK),
                         square(3, 9, 9, 0.01, ST_STATUS_OK)};
    int completed = 0;
    for (long n = 1; n < 5000 && !completed; n++) {
        st_districts_options o = {path, "code", "reg", NULL};
        st_diags dg;
        st_diags_init(&dg);
        st_findings out;
        st_findings_init(&out);
        st_districts *d = NULL;
        st_place_stats s;
        st_alloc_fail_after(n);
        st_status rc = st_districts_load(&o, &dg, &d);
        if (rc == ST_OK)
            rc = st_place_features(d, fs, 3, 1, ST_SEV_WARNING, &out, &dg, &s);
        st_alloc_fail_after(0);
        if (rc == ST_OK) {
            completed = 1;
            assert_int_equal(fs[1]->district, 0);
            assert_int_equal(out.count, 1);
        } else
            assert_true(rc == ST_ERR_NOMEM || rc == ST_ERR_IO || rc == ST_ERR_FORMAT ||
                        rc == ST_ERR_GEOS);
        st_districts_free(d);
        st_findings_free(&out);
        st_diags_free(&dg);
    }
    assert_true(completed);
    for (int i = 0; i < 3; i++)
        st_feature_free(fs[i]);
}

static int setup(void **state)
{
    (void)state;
    snprintf(tmpdir, sizeof tmpdir, "%s/st-place-XXXXXX", getenv("TMPDIR") ? getenv("TMPDIR") : "/tmp");
    return mkdtemp(tmpdir) ? 0 : -1;
}

static int teardown(void **state)
{
    (void)state;
    return scratch_remove(tmpdir);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_grid_points),
        cmocka_unit_test(test_border_follows_layer_order),
        cmocka_unit_test(test_threads_and_borders),
        cmocka_unit_test(test_invalid_district_repaired),
        cmocka_unit_test(test_merge_and_auto_key),
        cmocka_unit_test(test_bad_layers),
        cmocka_unit_test(test_anchor),
        cmocka_unit_test(test_alloc_failures),
    };
    return cmocka_run_group_tests(tests, setup, teardown);
}
