/*
** tests/unit/test_crs.c -- io/crs.c against published coordinates and cs2cs.
**
** References (see ../shared/REFERENCES.md section 1):
**   - UTM 38N: GeographicLib GeoConvert(1) man page pair 33.3N 44.4E <->
**     38n 444140.54 3684706.36 (PUB-R), published to 0.01 m.
**   - EPSG:27700: the GN7-2 Transverse Mercator example's grid coordinates
**     (PUB-R), compared with PROJ's own command-line tool cs2cs.
**   - EPSG:3035 LAEA Europe: GN7-2 example 50N 5E <-> E 3962799.45,
**     N 2999718.85 (PUB-S), the axis-order trap.
*/
#include <math.h>
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <stdio.h>
#include <string.h>
#include <cmocka.h>

#include "stocktake/core.h"
#include "stocktake/io.h"

/* WGS 84 ellipsoid, for converting a tolerance in metres to degrees. */
#define WGS84_A 6378137.0
#define WGS84_F (1.0 / 298.257223563)
#define DEG (M_PI / 180.0)

/* Metres per degree of latitude and of longitude at latitude 'lat' (deg):
** meridional radius M and prime-vertical radius N times cos(lat). */
static void metres_per_degree(double lat, double *m_lat, double *m_lon)
{
    double e2 = WGS84_F * (2.0 - WGS84_F);
    double s = sin(lat * DEG);
    double w = sqrt(1.0 - e2 * s * s);
    *m_lat = WGS84_A * (1.0 - e2) / (w * w * w) * DEG;
    *m_lon = WGS84_A / w * cos(lat * DEG) * DEG;
}

/* Transform one point from 'crs' to lon/lat through the module. */
static void to_lonlat(const char *crs, double x, double y, double *lon, double *lat)
{
    st_diags d;
    st_diags_init(&d);
    st_crs_transform *t = NULL;
    assert_int_equal(st_crs_to_wgs84(crs, "test.prj", &d, &t), ST_OK);
    assert_non_null(t);
    double xy[2] = {x, y};
    size_t failed = 99;
    assert_int_equal(st_crs_apply(t, xy, 1, &failed), ST_OK);
    assert_int_equal(failed, 0);
    *lon = xy[0];
    *lat = xy[1];
    st_crs_free(t);
    st_diags_free(&d);
}

/*
** GeoConvert man page (PUB-R): 38n 444140.54 3684706.36 is 33.3N 44.4E.
** The grid values are rounded to 0.01 m, so the true point lies within
** 0.005 m of them on each axis; the tolerance is that 5 mm converted to
** degrees at 33.3N (about 4.5e-8 deg of latitude, 5.4e-8 of longitude).
** REFERENCES.md measured PROJ 4.9 mm E / 4.5 mm N from the rounded pair.
*/
static void test_utm38n_geoconvert(void **state)
{
    (void)state;
    double lon, lat, m_lat, m_lon;
    to_lonlat("EPSG:32638", 444140.54, 3684706.36, &lon, &lat);
    metres_per_degree(33.3, &m_lat, &m_lon);
    assert_true(fabs(lon - 44.4) <= 0.005 / m_lon);
    assert_true(fabs(lat - 33.3) <= 0.005 / m_lat);
}

/* The same zone given as a PROJ string without "+type=crs" (a layer's
** --crs may be written that way) gives the same point and is named by
** its EPSG code. */
static void test_proj_string_is_read_as_crs(void **state)
{
    (void)state;
    double lon1, lat1, lon2, lat2;
    to_lonlat("EPSG:32638", 444140.54, 3684706.36, &lon1, &lat1);
    to_lonlat("+proj=utm +zone=38 +datum=WGS84 +units=m", 444140.54, 3684706.36,
              &lon2, &lat2);
    assert_true(fabs(lon1 - lon2) < 1e-12 && fabs(lat1 - lat2) < 1e-12);
    char *name = st_crs_identify("+proj=utm +zone=38 +datum=WGS84");
    assert_non_null(name);
    assert_string_equal(name, "EPSG:32638");
    st_free(name);
}

/*
** GN7-2 Transverse Mercator example in British National Grid (EPSG:27700):
** E 577274.99, N 69740.50. Its published geographic coordinates (50.5N
** 0.5E) are on OSGB36, not WGS 84: EPSG:27700 -> EPSG:4326 includes a
** datum shift of about 100 m, so the published lat/lon cannot be the
** expected value. The reference is PROJ's cs2cs, which picks the same
** operation from the same database: agreement to 1e-9 degrees.
*/
static void test_bng_agrees_with_cs2cs(void **state)
{
    (void)state;
    FILE *p = popen("echo '577274.99 69740.50' | "
                    "cs2cs -f %.12f EPSG:27700 EPSG:4326 2>/dev/null", "r");
    double clat = NAN, clon = NAN;
    int got = p ? fscanf(p, "%lf %lf", &clat, &clon) : 0;
    if (p)
        pclose(p);
    if (got != 2)
        skip();   /* cs2cs (proj-bin) not installed */
    double lon, lat;
    to_lonlat("EPSG:27700", 577274.99, 69740.50, &lon, &lat);
    /* cs2cs prints EPSG:4326 in its authority order: latitude first. */
    assert_true(fabs(lat - clat) <= 1e-9);
    assert_true(fabs(lon - clon) <= 1e-9);
    /* The datum shift is real: the OSGB36 values are ~1e-3 deg away. */
    assert_true(fabs(lon - 0.5) > 1e-4 || fabs(lat - 50.5) > 1e-4);
}

/*
** Axis-order trap. EPSG:3035 is northing-first in the EPSG registry and
** EPSG:4326 latitude-first; data files store easting first. Given
** (E, N) = (3962799.45, 2999718.85) the module must answer lon 5, lat 50
** (GN7-2, PUB-S). Read in authority order the same numbers would give
** 56.91N 12.08W (REFERENCES.md section 1, cs2cs output).
*/
static void test_laea_axis_order_trap(void **state)
{
    (void)state;
    double lon, lat, m_lat, m_lon;
    to_lonlat("EPSG:3035", 3962799.45, 2999718.85, &lon, &lat);
    metres_per_degree(50.0, &m_lat, &m_lon);
    assert_true(fabs(lon - 5.0) <= 0.005 / m_lon);
    assert_true(fabs(lat - 50.0) <= 0.005 / m_lat);
}

static const char esri_wgs84[] =
    "GEOGCS[\"GCS_WGS_1984\",DATUM[\"D_WGS_1984\",SPHEROID[\"WGS_1984\","
    "6378137,298.257223563]],PRIMEM[\"Greenwich\",0],UNIT[\"Degree\","
    "0.017453292519943295]]";

/* Lon/lat WGS 84 in any spelling needs no transformation (*out NULL):
** EPSG:4326 (lat-first by authority, lon-first as stored), CRS84, its
** URN, and the ESRI .prj flavour of WGS 84 as real shapefiles carry it. */
static void test_wgs84_needs_no_transform(void **state)
{
    (void)state;
    const char *defs[] = {"EPSG:4326", "OGC:CRS84", "urn:ogc:def:crs:OGC:1.3:CRS84",
                          esri_wgs84, "4326", "\xEF\xBB\xBF" "EPSG:4326\r\n"};
    for (size_t i = 0; i < sizeof defs / sizeof defs[0]; i++) {
        st_diags d;
        st_diags_init(&d);
        st_crs_transform *t = (st_crs_transform *)&d;   /* must be reset */
        assert_true(st_crs_is_wgs84(defs[i]));
        assert_int_equal(st_crs_to_wgs84(defs[i], "x.prj", &d, &t), ST_OK);
        assert_null(t);
        assert_int_equal(d.count, 0);
        st_diags_free(&d);
    }
    assert_false(st_crs_is_wgs84("EPSG:4979"));   /* 3-D: transformed, trivially */
    assert_false(st_crs_is_wgs84("EPSG:32638"));
    assert_false(st_crs_is_wgs84("EPSG:4258"));   /* ETRS89: another datum */
}

/* Identification: own identifier, else a confident EPSG match. The ESRI
** WKT of the Belem bairros .prj (SIRGAS 2000 / UTM 22S) has no identifier;
** PROJ identifies it as EPSG:31982 (its EPSG equivalent). */
static void test_identify(void **state)
{
    (void)state;
    static const char esri_sirgas[] =
        "PROJCS[\"SIRGAS_2000_UTM_Zone_22S\",GEOGCS[\"GCS_SIRGAS_2000\","
        "DATUM[\"D_SIRGAS_2000\",SPHEROID[\"GRS_1980\",6378137.0,298.257222101]],"
        "PRIMEM[\"Greenwich\",0.0],UNIT[\"Degree\",0.0174532925199433]],"
        "PROJECTION[\"Transverse_Mercator\"],PARAMETER[\"False_Easting\",500000.0],"
        "PARAMETER[\"False_Northing\",10000000.0],PARAMETER[\"Central_Meridian\",-51.0],"
        "PARAMETER[\"Scale_Factor\",0.9996],PARAMETER[\"Latitude_Of_Origin\",0.0],"
        "UNIT[\"Meter\",1.0]]";
    struct { const char *def, *want; } cases[] = {
        {"OGC:CRS84", "OGC:CRS84"},
        {"urn:ogc:def:crs:OGC:1.3:CRS84", "OGC:CRS84"},
        {"EPSG:32643", "EPSG:32643"},
        {esri_wgs84, "EPSG:4326"},
        {esri_sirgas, "EPSG:31982"},
    };
    for (size_t i = 0; i < sizeof cases / sizeof cases[0]; i++) {
        char *name = st_crs_identify(cases[i].def);
        assert_non_null(name);
        assert_string_equal(name, cases[i].want);
        st_free(name);
    }
    assert_null(st_crs_identify("EPSG:99999"));
    assert_null(st_crs_identify("not a crs at all"));

    st_diags d;
    st_diags_init(&d);
    st_crs_transform *t = NULL;
    assert_int_equal(st_crs_to_wgs84(esri_sirgas, "bairros.prj", &d, &t), ST_OK);
    assert_non_null(t);
    assert_string_equal(st_crs_name(t), "EPSG:31982");
    st_crs_free(t);
    st_diags_free(&d);
}

/* An unknown CRS is ST_ERR_PROJ with one diagnostic naming the file and
** quoting the definition, cut to 80 bytes. */
static void test_unknown_crs(void **state)
{
    (void)state;
    st_diags d;
    st_diags_init(&d);
    st_crs_transform *t = (st_crs_transform *)&d;
    assert_int_equal(st_crs_to_wgs84("EPSG:99999", "roads.shp", &d, &t), ST_ERR_PROJ);
    assert_null(t);
    assert_int_equal(d.errors, 1);
    assert_string_equal(d.items[0].file, "roads.shp");
    assert_non_null(strstr(d.items[0].message, "\"EPSG:99999\""));

    char longdef[300];
    memset(longdef, 'Q', sizeof longdef - 1);
    memcpy(longdef, "PROJCS[\"", 8);
    longdef[sizeof longdef - 1] = '\0';
    assert_int_equal(st_crs_to_wgs84(longdef, "roads.shp", &d, &t), ST_ERR_PROJ);
    assert_null(t);
    const char *m = d.items[1].message;
    const char *q = strchr(m, '"');
    assert_non_null(q);
    assert_memory_equal(q + 1 + 80, "...\"", 4);   /* 80 bytes, then the cut mark */

    /* A PROJ pipeline is an operation, not a CRS. */
    assert_int_equal(st_crs_to_wgs84("+proj=pipeline +step +proj=axisswap +order=2,1",
                                     "a.geojson", &d, &t), ST_ERR_PROJ);
    assert_int_equal(d.errors, 3);
    st_diags_free(&d);
}

/* Points PROJ cannot transform become infinite and are counted; the good
** ones in the same call are still transformed. */
static void test_failed_points_counted(void **state)
{
    (void)state;
    st_diags d;
    st_diags_init(&d);
    st_crs_transform *t = NULL;
    assert_int_equal(st_crs_to_wgs84("EPSG:3035", "x.gpkg", &d, &t), ST_OK);
    double xy[6] = {3962799.45, 2999718.85, 1e30, 1e30, NAN, 5.0};
    size_t failed = 0;
    assert_int_equal(st_crs_apply(t, xy, 3, &failed), ST_OK);
    assert_int_equal(failed, 2);
    assert_true(fabs(xy[0] - 5.0) < 1e-6 && fabs(xy[1] - 50.0) < 1e-6);
    assert_true(isinf(xy[2]) && isinf(xy[3]) && isinf(xy[4]) && isinf(xy[5]));
    st_crs_free(t);
    st_crs_free(NULL);
    st_diags_free(&d);
}

/* Every allocation of st_crs_to_wgs84 failing in turn gives ST_ERR_NOMEM
** (or a diagnostic-only failure) and leaks nothing (run under valgrind
** or ASan to see the leak half of this). */
static void test_alloc_failures(void **state)
{
    (void)state;
    for (long n = 1; n < 100; n++) {
        st_diags d;
        st_diags_init(&d);
        st_crs_transform *t = NULL;
        st_alloc_fail_after(n);
        st_status rc = st_crs_to_wgs84("EPSG:32638", "a.shp", &d, &t);
        st_alloc_fail_after(0);
        st_crs_free(t);
        st_diags_free(&d);
        if (rc == ST_OK)
            return;
        assert_int_equal(rc, ST_ERR_NOMEM);
        assert_null(t);
    }
    fail_msg("st_crs_to_wgs84 never succeeded");
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_utm38n_geoconvert),
        cmocka_unit_test(test_proj_string_is_read_as_crs),
        cmocka_unit_test(test_bng_agrees_with_cs2cs),
        cmocka_unit_test(test_laea_axis_order_trap),
        cmocka_unit_test(test_wgs84_needs_no_transform),
        cmocka_unit_test(test_identify),
        cmocka_unit_test(test_unknown_crs),
        cmocka_unit_test(test_failed_points_counted),
        cmocka_unit_test(test_alloc_failures),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
