/*
** tests/unit/test_tile.c -- windows for parts (tile.h): tile addresses and
** boxes parsed and refused, tile bounds against the tile that owns their
** points (every tile of a zoom owns its inside, and its west/north edges,
** and nothing across), the pole rows and the 180 degree column, halo
** growth that is at least the metres asked for (checked with the
** haversine distance on a sphere of radius 6,371 km, smaller than WGS 84's
** at every latitude used here), overreach, and the point that decides a
** feature's owner. The tile numbers against pyproj's web-mercator
** projection are tests/ref/test_tiles_pyproj.sh.
*/
#include <math.h>
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <string.h>
#include <cmocka.h>

#include "stocktake/tile.h"

static void test_parse(void **state)
{
    (void)state;
    st_window w;
    char err[256];
    assert_int_equal(st_window_parse_tile("0/0/0", &w, err, sizeof err), ST_OK);
    assert_true(w.is_tile);
    assert_true(w.west == -180 && w.east == 180 && w.north == 90 && w.south == -90);
    assert_int_equal(st_window_parse_tile("16/9784/42729", &w, err, sizeof err), ST_OK);
    assert_int_equal(w.z, 16);
    assert_int_equal(w.x, 9784);
    assert_int_equal(w.y, 42729);
    assert_string_equal(w.label, "tile 16/9784/42729");
    const char *bad[] = {"", "1/2/0", "1/0/2", "25/0/0", "3/1", "3/1/1/1", "a/b/c", "-1/0/0",
                         "3/1/1 ", "99999999999999999999/0/0"};
    for (size_t i = 0; i < sizeof bad / sizeof *bad; i++) {
        assert_int_equal(st_window_parse_tile(bad[i], &w, err, sizeof err), ST_ERR_USAGE);
        assert_non_null(strstr(err, "not a tile address"));
    }
    assert_int_equal(st_window_parse_bbox("-1.5,2,3,4.25", &w, err, sizeof err), ST_OK);
    assert_false(w.is_tile);
    assert_true(w.west == -1.5 && w.south == 2 && w.east == 3 && w.north == 4.25);
    const char *badbox[] = {"", "1,2,3", "3,2,1,4", "1,4,3,2", "-181,0,0,1", "0,0,1,91",
                            "0,0,1,1,", "0,0,1,nan", "0;0;1;1"};
    for (size_t i = 0; i < sizeof badbox / sizeof *badbox; i++) {
        assert_int_equal(st_window_parse_bbox(badbox[i], &w, err, sizeof err), ST_ERR_USAGE);
        assert_non_null(strstr(err, "not a box"));
    }
}

/* Points just inside each edge of a tile are owned by it; points just
** outside by its neighbours. */
static void test_tile_bounds_own_their_inside(void **state)
{
    (void)state;
    const char *specs[] = {"1/0/0", "1/1/1", "5/3/11", "12/2048/1361", "16/9784/42729", "20/1000/500000"};
    for (size_t i = 0; i < sizeof specs / sizeof *specs; i++) {
        st_window w;
        char err[128];
        assert_int_equal(st_window_parse_tile(specs[i], &w, err, sizeof err), ST_OK);
        double dx = (w.east - w.west) * 1e-6, dy = (w.north - w.south) * 1e-6;
        double mx = (w.west + w.east) / 2, my = (w.south + w.north) / 2;
        assert_true(st_window_owns(&w, mx, my));
        assert_true(st_window_owns(&w, w.west + dx, my));
        assert_true(st_window_owns(&w, w.east - dx, my));
        assert_true(st_window_owns(&w, mx, w.north - dy));
        assert_true(st_window_owns(&w, mx, w.south + dy));
        /* outside, but for the edges of the world (clamped: owned) */
        if (w.west > -180)
            assert_false(st_window_owns(&w, w.west - dx, my));
        if (w.east < 180)
            assert_false(st_window_owns(&w, w.east + dx, my));
        if (w.north < 90)
            assert_false(st_window_owns(&w, mx, w.north + dy));
        if (w.south > -90)
            assert_false(st_window_owns(&w, mx, w.south - dy));
    }
}

static void test_poles_and_antimeridian(void **state)
{
    (void)state;
    uint32_t x, y;
    st_tile_of(0, 89.9, 3, &x, &y);
    assert_int_equal(y, 0);
    st_tile_of(0, -90, 3, &x, &y);
    assert_int_equal(y, 7);
    st_tile_of(180, 0, 3, &x, &y);
    assert_int_equal(x, 7);
    st_tile_of(-180, 0, 3, &x, &y);
    assert_int_equal(x, 0);
    st_window w;
    char err[128];
    assert_int_equal(st_window_parse_tile("3/7/0", &w, err, sizeof err), ST_OK);
    assert_true(w.north == 90);
    assert_true(st_window_owns(&w, 180, 89.99));
    /* every point of a zoom-2 grid is owned by exactly one tile */
    for (double lon = -180; lon <= 180; lon += 7.5)
        for (double lat = -90; lat <= 90; lat += 7.5) {
            int owners = 0;
            for (uint32_t tx = 0; tx < 4; tx++)
                for (uint32_t ty = 0; ty < 4; ty++) {
                    char spec[32];
                    snprintf(spec, sizeof spec, "2/%u/%u", tx, ty);
                    assert_int_equal(st_window_parse_tile(spec, &w, err, sizeof err), ST_OK);
                    owners += st_window_owns(&w, lon, lat);
                }
            assert_int_equal(owners, 1);
        }
}

static double haversine_m(double lon1, double lat1, double lon2, double lat2)
{
    const double r = 6371000.0, k = M_PI / 180;
    double a = pow(sin((lat2 - lat1) * k / 2), 2) +
               cos(lat1 * k) * cos(lat2 * k) * pow(sin((lon2 - lon1) * k / 2), 2);
    return 2 * r * asin(sqrt(a));
}

static void test_grow_is_at_least_the_halo(void **state)
{
    (void)state;
    const char *boxes[] = {"10,0,11,1", "-126.3,-47.96,-126.1,-47.87", "20,69,21,70"};
    for (size_t i = 0; i < sizeof boxes / sizeof *boxes; i++) {
        st_window w;
        char err[128];
        assert_int_equal(st_window_parse_bbox(boxes[i], &w, err, sizeof err), ST_OK);
        double g[4];
        st_window_grow(&w, 500, g);
        assert_true(g[0] < w.west && g[2] > w.east && g[1] < w.south && g[3] > w.north);
        for (int k = 0; k < 2; k++) {
            double lat = k ? w.north : w.south;
            assert_true(haversine_m(g[0], lat, w.west, lat) >= 500);
            assert_true(haversine_m(g[2], lat, w.east, lat) >= 500);
        }
        assert_true(haversine_m(w.west, g[1], w.west, w.south) >= 500);
        assert_true(haversine_m(w.west, g[3], w.west, w.north) >= 500);
        /* not absurdly more: under 1.2 times at the window's edges */
        assert_true(haversine_m(w.west, g[3], w.west, w.north) < 600);
        /* overreach of the grown box is at least the halo */
        assert_true(st_window_overreach_m(&w, g) >= 500);
        double inside[4] = {w.west, w.south, w.east, w.north};
        assert_true(st_window_overreach_m(&w, inside) == 0);
    }
    st_window w;
    char err[128];
    assert_int_equal(st_window_parse_bbox("0,88,1,89.5", &w, err, sizeof err), ST_OK);
    double g[4];
    st_window_grow(&w, 200000, g);
    assert_true(g[0] == -180 && g[2] == 180 && g[3] == 90);
}

static void square(st_geom *g, double x, double y, double d)
{
    st_geom_init(g);
    g->type = ST_GEOM_POLYGON;
    assert_int_equal(st_geom_begin_part(g), ST_OK);
    assert_int_equal(st_geom_begin_ring(g), ST_OK);
    double c[5][2] = {{x, y}, {x + d, y}, {x + d, y + d}, {x, y + d}, {x, y}};
    for (int i = 0; i < 5; i++)
        assert_int_equal(st_geom_add_xy(g, c[i][0], c[i][1]), ST_OK);
}

static void test_point(void **state)
{
    (void)state;
    st_geos *gx = st_geos_new();
    assert_non_null(gx);
    st_geom g;
    double xy[2];
    square(&g, 10, 20, 0.001);
    assert_int_equal(st_tile_point(gx, &g, xy), 1);
    assert_true(xy[0] > 10 && xy[0] < 10.001 && xy[1] > 20 && xy[1] < 20.001);
    st_geom_clear(&g);
    square(&g, 10, 95, 0.001);   /* out of range: no window owns it */
    assert_int_equal(st_tile_point(gx, &g, xy), 0);
    st_geom_clear(&g);
    square(&g, NAN, 20, 0.001);
    assert_int_equal(st_tile_point(gx, &g, xy), 0);
    st_geom_clear(&g);
    st_geom_init(&g);
    assert_int_equal(st_tile_point(gx, &g, xy), 0);   /* null geometry */
    g.type = ST_GEOM_POLYGON;
    assert_int_equal(st_tile_point(gx, &g, xy), 0);   /* empty */
    /* a bow tie (invalid) still gets a point, inside its box */
    st_geom_init(&g);
    g.type = ST_GEOM_POLYGON;
    assert_int_equal(st_geom_begin_part(&g), ST_OK);
    assert_int_equal(st_geom_begin_ring(&g), ST_OK);
    double c[5][2] = {{0, 0}, {1, 1}, {1, 0}, {0, 1}, {0, 0}};
    for (int i = 0; i < 5; i++)
        assert_int_equal(st_geom_add_xy(&g, c[i][0], c[i][1]), ST_OK);
    assert_int_equal(st_tile_point(gx, &g, xy), 1);
    assert_true(xy[0] >= 0 && xy[0] <= 1 && xy[1] >= 0 && xy[1] <= 1);
    st_geom_clear(&g);
    st_geos_free(gx);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_parse),
        cmocka_unit_test(test_tile_bounds_own_their_inside),
        cmocka_unit_test(test_poles_and_antimeridian),
        cmocka_unit_test(test_grow_is_at_least_the_halo),
        cmocka_unit_test(test_point),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
