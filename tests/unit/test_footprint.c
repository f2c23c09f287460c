/*
** tests/unit/test_footprint.c -- the footprint stage: OGC invalidity kinds
** and their repair, geodesic measures against pyproj and published values,
** compactness, ring defects, coordinates, swapped axes, thresholds, the
** three repair policies, settings by name, and allocation failure.
**
** Outside references: REFERENCES.md sections 2, 3 and 7 (tags in the
** comments); pyproj's Geod through /usr/bin/python3
** (tests/data/footprint/pyproj_area.py); shapely's verdicts on the same
** invalid cases are checked by tests/ref/test_validity_shapely.sh.
** Fixture paths are relative to the checkout root, where `make` runs tests.
*/
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <math.h>
#include <stdio.h>
#include <string.h>
#include <cmocka.h>

#include "stocktake/footprint.h"
#include "stocktake/geomx.h"
#include "wkt_loose.h"

#define CASES "tests/data/footprint/invalid_cases.txt"
#define GEOD_CASES "tests/data/footprint/geodesic_cases.txt"
#define PYPROJ "/usr/bin/python3 tests/data/footprint/pyproj_area.py " GEOD_CASES

/* WGS 84 and metres per degree at the equator: a along a parallel, the
** meridional radius a(1 - e^2) along a meridian. */
#define WGS84_A 6378137.0
#define WGS84_F (1.0 / 298.257223563)
#define E2 (WGS84_F * (2.0 - WGS84_F))
#define M_PER_DEG_LON (WGS84_A * M_PI / 180.0)
#define M_PER_DEG_LAT (WGS84_A * (1.0 - E2) * M_PI / 180.0)

/* Fixture units in degrees: 1e-4 deg is about 11 m, so the unit squares of
** the invalid cases are buildings of a few thousand m2 near (0, 0). */
#define UNIT 1e-4
#define UNIT_M2 (UNIT * UNIT * M_PER_DEG_LON * M_PER_DEG_LAT)

/* ---- helpers ------------------------------------------------------------- */

static st_feature *feature_at(const char *wkt, double scale, double x0, double y0)
{
    st_feature *f = st_feature_new();
    assert_non_null(f);
    f->bid = 42;
    if (!wkt_loose_read(wkt, scale, x0, y0, &f->geom))
        fail_msg("fixture WKT does not parse: %s", wkt);
    return f;
}

static st_feature *feature(const char *wkt)
{
    return feature_at(wkt, UNIT, 0.0, 0.0);
}

static st_footprint_checker *checker(void)
{
    st_footprint_checker *ck = NULL;
    assert_int_equal(st_footprint_checker_new(&ck), ST_OK);
    assert_non_null(ck);
    return ck;
}

/* Number of findings with 'code' in the list. */
static int count_code(const st_findings *l, const char *code)
{
    int n = 0;
    for (size_t i = 0; i < l->count; i++)
        n += strcmp(l->items[i].code, code) == 0;
    return n;
}

static const st_finding *find_code(const st_findings *l, const char *code)
{
    for (size_t i = 0; i < l->count; i++)
        if (strcmp(l->items[i].code, code) == 0)
            return &l->items[i];
    return NULL;
}

/* Run one check with cfg; returns the feature (caller frees). */
static void check(st_footprint_checker *ck, const st_footprint_config *cfg, st_feature *f,
                  st_findings *out)
{
    assert_int_equal(st_footprint_check(ck, cfg, f, out), ST_OK);
}

static int geos_is_valid(const st_geom *g)
{
    st_geos *gx = st_geos_new();
    assert_non_null(gx);
    char err[256] = "";
    GEOSGeometry *x = st_geom_to_geos(gx, g, err, sizeof err);
    int valid = x ? GEOSisValid_r(gx->h, x) : -1;
    if (x)
        GEOSGeom_destroy_r(gx->h, x);
    st_geos_free(gx);
    return valid;
}

static void assert_close(double got, double want, double rel, const char *what)
{
    double tol = rel * fabs(want);
    if (!(fabs(got - want) <= tol))
        fail_msg("%s: got %.10g, want %.10g (rel. tolerance %g)", what, got, want, rel);
}

static void assert_near(double got, double want, double abs_tol, const char *what)
{
    if (!(fabs(got - want) <= abs_tol))
        fail_msg("%s: got %.10f, want %.10f (+/- %g)", what, got, want, abs_tol);
}

/* ---- the OGC invalidity cases (fixture shared with the shapely check) ---- */

typedef struct invalid_case {
    char code[64];
    char structure[16], linework[16];
    char wkt[512];
    int line;
} invalid_case;

static char *trim(char *s)
{
    while (*s == ' ')
        s++;
    size_t n = strlen(s);
    while (n && (s[n - 1] == ' ' || s[n - 1] == '\n'))
        s[--n] = '\0';
    return s;
}

/* Reads every case of CASES into cs (at most max); returns the count. */
static int read_cases(invalid_case *cs, int max)
{
    FILE *fp = fopen(CASES, "r");
    if (!fp)
        fail_msg("cannot open %s (run from the checkout root)", CASES);
    char line[1024];
    int n = 0, lineno = 0;
    while (fgets(line, sizeof line, fp)) {
        lineno++;
        if (line[0] == '#' || line[0] == '\n')
            continue;
        char *field[4];
        char *p = line;
        for (int k = 0; k < 4; k++) {
            field[k] = p;
            char *bar = k < 3 ? strstr(p, " | ") : NULL;
            if (k < 3 && !bar)
                fail_msg("%s:%d: expected 4 fields", CASES, lineno);
            if (bar) {
                *bar = '\0';
                p = bar + 3;
            }
        }
        assert_true(n < max);
        invalid_case *c = &cs[n++];
        snprintf(c->code, sizeof c->code, "%s", trim(field[0]));
        snprintf(c->structure, sizeof c->structure, "%s", trim(field[1]));
        snprintf(c->linework, sizeof c->linework, "%s", trim(field[2]));
        snprintf(c->wkt, sizeof c->wkt, "%s", trim(field[3]));
        c->line = lineno;
    }
    fclose(fp);
    return n;
}

/* Each case under make-valid with 'method': the expected code is found,
** and the feature is repaired to a valid geometry of the expected area, or
** rejected where the file says so. */
static void run_cases_repair(st_repair_method method)
{
    invalid_case cs[32];
    int n = read_cases(cs, 32);
    assert_true(n >= 12);
    st_footprint_checker *ck = checker();
    st_footprint_config cfg = st_footprint_config_default();
    cfg.method = method;
    for (int i = 0; i < n; i++) {
        const invalid_case *c = &cs[i];
        const char *want = method == ST_REPAIR_STRUCTURE ? c->structure : c->linework;
        st_feature *f = feature(c->wkt);
        uint32_t source_coords = f->geom.ncoords;
        st_findings out;
        st_findings_init(&out);
        check(ck, &cfg, f, &out);
        if (count_code(&out, c->code) != 1)
            fail_msg("line %d: %s not reported once", c->line, c->code);
        if (strcmp(want, "reject") == 0) {
            if (f->status != ST_STATUS_REJECTED)
                fail_msg("line %d: expected rejection, got %s", c->line,
                         st_feature_status_name(f->status));
            assert_non_null(f->reason);
            assert_int_equal(f->geom.ncoords, source_coords);  /* source kept */
        } else {
            if (f->status != ST_STATUS_REPAIRED)
                fail_msg("line %d: expected repair, got %s (%s)", c->line,
                         st_feature_status_name(f->status), f->reason ? f->reason : "");
            assert_int_equal(geos_is_valid(&f->geom), 1);
            assert_true(f->flags & ST_FLAG_REPLACED);
            assert_non_null(f->source_geom);
            assert_int_equal(f->source_geom->ncoords, source_coords);
            assert_non_null(find_code(&out, "repair.applied"));
            char what[64];
            snprintf(what, sizeof what, "line %d area", c->line);
            assert_close(f->area_m2, atof(want) * UNIT_M2, 1e-4, what);
        }
        st_findings_free(&out);
        st_feature_free(f);
    }
    st_footprint_checker_free(ck);
}

static void test_invalid_cases_structure(void **state)
{
    (void)state;
    run_cases_repair(ST_REPAIR_STRUCTURE);
}

/* Linework areas are GEOS MakeValid's own (REFERENCES.md 3.2, OBS). */
static void test_invalid_cases_linework(void **state)
{
    (void)state;
    run_cases_repair(ST_REPAIR_LINEWORK);
}

static void test_invalid_cases_reject_and_keep(void **state)
{
    (void)state;
    invalid_case cs[32];
    int n = read_cases(cs, 32);
    st_footprint_checker *ck = checker();
    st_footprint_config reject = st_footprint_config_default();
    st_footprint_config keep = reject;
    reject.repair = ST_REPAIR_REJECT;
    keep.repair = ST_REPAIR_KEEP;
    for (int i = 0; i < n; i++) {
        st_findings out;
        st_findings_init(&out);
        st_feature *f = feature(cs[i].wkt);
        uint32_t nc = f->geom.ncoords;
        check(ck, &reject, f, &out);
        if (f->status != ST_STATUS_REJECTED || count_code(&out, cs[i].code) != 1)
            fail_msg("line %d: reject policy did not reject with %s", cs[i].line, cs[i].code);
        assert_false(f->flags & ST_FLAG_REPLACED);
        assert_int_equal(f->geom.ncoords, nc);
        st_feature_free(f);
        st_findings_free(&out);

        f = feature(cs[i].wkt);
        check(ck, &keep, f, &out);
        /* keep: flagged, status OK -- except a NaN, which nothing can use */
        int bad_coord = strcmp(cs[i].code, "geom.bad-coordinate") == 0;
        if (f->status != (bad_coord ? ST_STATUS_REJECTED : ST_STATUS_OK) ||
            count_code(&out, cs[i].code) != 1)
            fail_msg("line %d: keep policy: status %s", cs[i].line,
                     st_feature_status_name(f->status));
        if (!bad_coord)
            assert_true(f->flags & (ST_FLAG_INVALID | ST_FLAG_TOO_FEW_POINTS));
        assert_int_equal(f->geom.ncoords, nc);
        assert_int_equal(count_code(&out, "repair.applied"), 0);
        st_feature_free(f);
        st_findings_free(&out);
    }
    st_footprint_checker_free(ck);
}

/* The finding's location is GEOS's point: the bow-tie crosses at (5 5). */
static void test_invalid_location(void **state)
{
    (void)state;
    st_footprint_checker *ck = checker();
    st_footprint_config cfg = st_footprint_config_default();
    st_findings out;
    st_findings_init(&out);
    st_feature *f = feature("POLYGON((0 0,10 10,10 0,0 10,0 0))");
    check(ck, &cfg, f, &out);
    const st_finding *x = find_code(&out, "geom.self-intersection");
    assert_non_null(x);
    assert_int_equal(x->bid, 42);
    assert_int_equal(x->severity, ST_SEV_ERROR);
    assert_near(x->x, 5 * UNIT, 1e-12, "x");
    assert_near(x->y, 5 * UNIT, 1e-12, "y");
    /* source area of a bow-tie: its lobes cancel (0); repaired: 50 units */
    const st_finding *ch = find_code(&out, "repair.area-changed");
    assert_non_null(ch);
    assert_true(f->flags & ST_FLAG_AREA_CHANGED);
    st_findings_free(&out);
    st_feature_free(f);

    /* the figure-8 keeps its area (50 -> 50): no area-change finding */
    f = feature("POLYGON((0 0,10 0,5 5,10 10,0 10,5 5,0 0))");
    check(ck, &cfg, f, &out);
    assert_int_equal(f->status, ST_STATUS_REPAIRED);
    assert_null(find_code(&out, "repair.area-changed"));
    st_findings_free(&out);
    st_feature_free(f);
    st_footprint_checker_free(ck);
}

/* ---- geodesic measures ----------------------------------------------------- */

static st_geom geom_of(const char *wkt)
{
    st_geom g;
    if (!wkt_loose_read(wkt, 1.0, 0.0, 0.0, &g))
        fail_msg("bad WKT %s", wkt);
    return g;
}

static void measure(const st_footprint_checker *ck, const char *wkt, double *a, double *p)
{
    st_geom g = geom_of(wkt);
    st_footprint_measure(ck, &g, a, p);
    st_geom_clear(&g);
}

/* WKT of case 'name' in GEOD_CASES, copied to wkt. */
static int geod_case(const char *name, char *wkt, size_t n)
{
    FILE *fp = fopen(GEOD_CASES, "r");
    assert_non_null(fp);
    char line[1024];
    int found = 0;
    while (!found && fgets(line, sizeof line, fp)) {
        char *bar = strstr(line, " | ");
        if (line[0] == '#' || !bar)
            continue;
        *bar = '\0';
        if (strcmp(trim(line), name) == 0) {
            snprintf(wkt, n, "%s", trim(bar + 3));
            found = 1;
        }
    }
    fclose(fp);
    return found;
}

/* Every footprint of GEOD_CASES within 0.01 % of pyproj's Geod. */
static void test_geodesic_vs_pyproj(void **state)
{
    (void)state;
    FILE *py = popen(PYPROJ " 2>/dev/null", "r");
    if (!py)
        skip();
    st_footprint_checker *ck = checker();
    char line[512], name[128], wkt[1024];
    double want_a, want_p;
    int n = 0;
    while (fgets(line, sizeof line, py)) {
        if (sscanf(line, "%127s %lf %lf", name, &want_a, &want_p) != 3)
            continue;
        if (!geod_case(name, wkt, sizeof wkt))
            fail_msg("pyproj printed unknown case %s", name);
        double a, p;
        measure(ck, wkt, &a, &p);
        assert_close(a, want_a, 1e-4, name);
        assert_close(p, want_p, 1e-4, name);
        n++;
    }
    int rc = pclose(py);
    st_footprint_checker_free(ck);
    if (n == 0 && rc != 0)
        skip();   /* no /usr/bin/python3 with pyproj here */
    assert_int_equal(n, 9);
}

/* Published and computed values from REFERENCES.md section 2. */
static void test_geodesic_published(void **state)
{
    (void)state;
    st_footprint_checker *ck = checker();
    double a, p;
    /* row 9, PUB-R (geographiclib-rs PolygonArea docs): 1 deg cell */
    measure(ck, "POLYGON((0 0,1 0,1 1,0 1,0 0))", &a, &p);
    assert_close(a, 12308778361.469452, 1e-12, "1 deg cell area");
    assert_close(p, 443770.917248302, 1e-12, "1 deg cell perimeter");
    /* row 9b, COMP: clockwise gives the same size */
    measure(ck, "POLYGON((0 0,0 1,1 1,1 0,0 0))", &a, &p);
    assert_close(a, 12308778361.469452, 1e-12, "1 deg cell clockwise");
    /* row 12, PUB-R (pyproj docs): polygon with a hole, both rings as typed
    ** (clockwise): the hole subtracts whatever the orientation */
    measure(ck, "POLYGON((1 1,1 10,10 10,10 1,1 1),(1 2,3 4,5 2,1 2))", &a, &p);
    assert_near(a, 944373881400.339, 2e-3, "pyproj hole polygon area");
    assert_near(p, 3979008.036, 2e-3, "pyproj hole polygon perimeter");
    /* row 7, PUB-S (GeographicLib test "Planimeter15"): lat,lon (2,1),(1,2),(3,3) */
    measure(ck, "POLYGON((1 2,2 1,3 3,1 2))", &a, &p);
    assert_near(a, 18454562325.45119, 1e-3, "triangle area");
    /* row 6, PUB-S: London, New York, Rio, Johannesburg */
    measure(ck, "POLYGON((0 52,-74 41,-43 -23,28 -26,0 52))", &a, &p);
    assert_near(a, 65690027591345.67, 0.05, "London-NY-Rio-Johannesburg area");
    assert_near(p, 29506941.1551780, 1e-6, "London-NY-Rio-Johannesburg perimeter");
    /* rows 13-15, COMP: footprint-scale cells */
    measure(ck, "POLYGON((0 0,0.0001 0,0.0001 0.0001,0 0.0001,0 0))", &a, &p);
    assert_near(a, 123.0907208, 1e-6, "equator cell");
    assert_near(p, 44.3787533, 1e-6, "equator cell perimeter");
    measure(ck, "POLYGON((0 45,0.0001 45,0.0001 45.0001,0 45.0001,0 45))", &a, &p);
    assert_near(a, 87.6238138, 1e-6, "45N cell");
    assert_near(p, 37.9957090, 1e-6, "45N cell perimeter");
    measure(ck, "POLYGON((10 60,10.0001 60,10.0001 60.0001,10 60.0001,10 60))", &a, &p);
    assert_near(a, 62.1679648, 1e-6, "60N cell");
    assert_near(p, 33.4424411, 1e-6, "60N cell perimeter");
    /* row 17, COMP: across the antimeridian */
    measure(ck, "POLYGON((179.99995 -16,-179.99995 -16,-179.99995 -15.9999,"
                "179.99995 -15.9999,179.99995 -16))", &a, &p);
    assert_near(a, 118.4429, 1e-4, "antimeridian area");
    assert_near(p, 43.5386, 1e-4, "antimeridian perimeter");
    st_footprint_checker_free(ck);
}

/* Authalic-latitude function q(phi) (Snyder 1987, eq. 3-12; MEM): the area
** between the equator and phi over dlambda radians is a^2 dlambda q / 2. */
static double authalic_q(double phi_deg)
{
    double e = sqrt(E2), s = sin(phi_deg * M_PI / 180.0);
    return (1.0 - E2) * (s / (1.0 - E2 * s * s) -
                         log((1.0 - e * s) / (1.0 + e * s)) / (2.0 * e));
}

/* Analytic area of a cell bounded by parallels, against the geodesic area of
** the same cell with its parallels densified (REFERENCES.md section 2 rows
** 8, 10: the geodesic polygon converges on the zone as edges shorten). */
static void test_geodesic_analytic_cell(void **state)
{
    (void)state;
    double zone = WGS84_A * WGS84_A * (M_PI / 180.0) / 2.0 * (authalic_q(1) - authalic_q(0));
    /* row 10, COMP: 12308463893.9752 m2 */
    assert_near(zone, 12308463893.9752, 1e-3, "closed form 1 deg zone cell");
    /* row 8, PUB-S (GeographicLib test constant): the whole ellipsoid */
    double earth = WGS84_A * WGS84_A * (2.0 * M_PI) / 2.0 * (authalic_q(90) - authalic_q(-90));
    assert_close(earth, 510065621724088.5093, 1e-12, "whole ellipsoid");

    st_geom g;
    st_geom_init(&g);
    g.type = ST_GEOM_POLYGON;
    const int n = 1000;
    for (int i = 0; i <= n; i++)       /* south edge, along the equator */
        assert_int_equal(st_geom_add_xy(&g, (double)i / n, 0.0), ST_OK);
    for (int i = n; i >= 0; i--)       /* north edge, along 1 deg N */
        assert_int_equal(st_geom_add_xy(&g, (double)i / n, 1.0), ST_OK);
    assert_int_equal(st_geom_add_xy(&g, 0.0, 0.0), ST_OK);
    st_footprint_checker *ck = checker();
    double a, p;
    st_footprint_measure(ck, &g, &a, &p);
    assert_close(a, zone, 1e-9, "densified cell vs closed form");
    /* and the undensified geodesic cell differs by 0.0026 % (row 10b) */
    double a4, p4;
    measure(ck, "POLYGON((0 0,1 0,1 1,0 1,0 0))", &a4, &p4);
    assert_close(a4 - zone, 314467.5, 1e-6, "geodesic bulge of the 1 deg cell");
    st_geom_clear(&g);
    st_footprint_checker_free(ck);
}

/* ---- compactness (REFERENCES.md section 7, COMP) ---------------------------- */

/* A footprint given in metres east/north of lon 10, lat 0. */
static st_feature *metric_feature(const double *m, int n)
{
    st_feature *f = st_feature_new();
    assert_non_null(f);
    f->geom.type = ST_GEOM_POLYGON;
    for (int i = 0; i <= n; i++) {
        int k = i % n;
        assert_int_equal(st_geom_add_xy(&f->geom, 10.0 + m[2 * k] / M_PER_DEG_LON,
                                        m[2 * k + 1] / M_PER_DEG_LAT), ST_OK);
    }
    return f;
}

static void test_compactness(void **state)
{
    (void)state;
    const double h = 5.0 * sqrt(3.0);
    const double square[] = {0, 0, 10, 0, 10, 10, 0, 10};
    const double rect[] = {0, 0, 20, 0, 20, 10, 0, 10};
    const double ell[] = {0, 0, 20, 0, 20, 10, 10, 10, 10, 20, 0, 20};
    const double tri[] = {0, 0, 10, 0, 5, h};
    const double thin[] = {0, 0, 10, 0, 10, 1, 0, 1};
    const double sliver[] = {0, 0, 20, 0, 20, 0.2, 0, 0.2};
    const struct {
        const double *m;
        int n;
        double area, pp;
        int is_sliver;
    } cases[] = {
        {square, 4, 100, 0.785398, 0}, {rect, 4, 200, 0.698132, 0},
        {ell, 6, 300, 0.589049, 0},    {tri, 3, 50 * sqrt(3.0) / 2 * 1, 0.604600, 0},
        {thin, 4, 10, 0.259636, 0},    {sliver, 4, 4, 0.030797, 1},
    };
    st_footprint_checker *ck = checker();
    st_footprint_config cfg = st_footprint_config_default();
    for (size_t i = 0; i < sizeof cases / sizeof cases[0]; i++) {
        st_feature *f = metric_feature(cases[i].m, cases[i].n);
        st_findings out;
        st_findings_init(&out);
        check(ck, &cfg, f, &out);
        assert_int_equal(f->status, ST_STATUS_OK);
        assert_close(f->area_m2, cases[i].area, 1e-6, "geodesic ~ planar area");
        double pp = st_footprint_compactness(f->area_m2, f->perimeter_m);
        assert_near(pp, cases[i].pp, 1e-6, "compactness");
        assert_int_equal(!!(f->flags & ST_FLAG_SLIVER), cases[i].is_sliver);
        assert_int_equal(count_code(&out, "shape.sliver"), cases[i].is_sliver);
        st_findings_free(&out);
        st_feature_free(f);
    }
    assert_true(isnan(st_footprint_compactness(1.0, 0.0)));
    st_footprint_checker_free(ck);
}

/* ---- ring defects ---------------------------------------------------------- */

static void test_unclosed_ring(void **state)
{
    (void)state;
    const char *wkt = "POLYGON((0 0,10 0,10 10,0 10))";
    st_footprint_checker *ck = checker();
    st_footprint_config cfg = st_footprint_config_default();
    st_findings out;
    st_findings_init(&out);
    st_feature *f = feature(wkt);
    check(ck, &cfg, f, &out);
    assert_int_equal(f->status, ST_STATUS_REPAIRED);
    assert_true(f->flags & ST_FLAG_UNCLOSED);
    assert_int_equal(count_code(&out, "geom.unclosed-ring"), 1);
    assert_int_equal(f->geom.ncoords, 5);
    assert_true(f->geom.xy[0] == f->geom.xy[8] && f->geom.xy[1] == f->geom.xy[9]);
    assert_non_null(f->source_geom);
    assert_int_equal(f->source_geom->ncoords, 4);
    assert_close(f->area_m2, 100 * UNIT_M2, 1e-4, "closed ring area");
    /* closing alone does not change the area the source describes */
    assert_int_equal(count_code(&out, "repair.area-changed"), 0);
    st_feature_free(f);
    st_findings_free(&out);

    for (int policy = ST_REPAIR_REJECT; policy <= ST_REPAIR_KEEP; policy++) {
        cfg.repair = (st_repair_policy)policy;
        f = feature(wkt);
        check(ck, &cfg, f, &out);
        assert_int_equal(f->status, ST_STATUS_REJECTED);   /* GEOS cannot read it */
        assert_non_null(strstr(f->reason, "not closed"));
        assert_int_equal(f->geom.ncoords, 4);
        st_feature_free(f);
        st_findings_free(&out);
    }
    st_footprint_checker_free(ck);
}

static void test_repeated_vertices(void **state)
{
    (void)state;
    const char *wkt = "POLYGON((0 0,10 0,10 0,10 10,0 10,0 10,0 0))";
    st_footprint_checker *ck = checker();
    st_footprint_config cfg = st_footprint_config_default();
    st_findings out;
    st_findings_init(&out);
    st_feature *f = feature(wkt);
    check(ck, &cfg, f, &out);
    const st_finding *x = find_code(&out, "geom.repeated-vertex");
    assert_non_null(x);
    assert_non_null(strstr(x->message, "2 consecutive"));
    assert_near(x->x, 10 * UNIT, 1e-15, "repeat x");
    assert_int_equal(x->severity, ST_SEV_NOTE);
    assert_int_equal(f->status, ST_STATUS_REPAIRED);
    assert_int_equal(f->geom.ncoords, 5);
    assert_int_equal(count_code(&out, "geom.self-intersection"), 0);   /* valid */
    st_feature_free(f);
    st_findings_free(&out);
    /* valid under OGC: reject and keep leave it alone */
    for (int policy = ST_REPAIR_REJECT; policy <= ST_REPAIR_KEEP; policy++) {
        cfg.repair = (st_repair_policy)policy;
        f = feature(wkt);
        check(ck, &cfg, f, &out);
        assert_int_equal(f->status, ST_STATUS_OK);
        assert_int_equal(f->geom.ncoords, 7);
        assert_true(f->flags & ST_FLAG_REPEATED);
        st_feature_free(f);
        st_findings_free(&out);
    }
    st_footprint_checker_free(ck);
}

static void test_spikes(void **state)
{
    (void)state;
    st_footprint_checker *ck = checker();
    st_footprint_config cfg = st_footprint_config_default();
    st_findings out;
    st_findings_init(&out);
    /* a needle 5 units long and 0.04 wide: edges meet at 0.46 deg; valid */
    const char *needle = "POLYGON((0 0,10 0,10 5,15 5.02,10 5.04,10 10,0 10,0 0))";
    st_feature *f = feature(needle);
    check(ck, &cfg, f, &out);
    const st_finding *x = find_code(&out, "geom.spike");
    assert_non_null(x);
    assert_near(x->x, 15 * UNIT, 1e-15, "spike x");
    assert_int_equal(f->status, ST_STATUS_OK);         /* valid: nothing to repair */
    assert_false(f->flags & ST_FLAG_INVALID);
    st_feature_free(f);
    st_findings_free(&out);
    /* with the threshold at 0.3 deg it is no spike */
    const st_severity warn = ST_SEV_WARNING;
    assert_int_equal(st_footprint_config_set(&cfg, "spike-angle", 0.3, "deg", &warn, NULL, 0),
                     ST_OK);
    f = feature(needle);
    check(ck, &cfg, f, &out);
    assert_int_equal(count_code(&out, "geom.spike"), 0);
    st_feature_free(f);
    st_findings_free(&out);
    /* an exact spike (cut line) is also a self-intersection; the repair
    ** drops it and keeps the 100-unit square */
    cfg = st_footprint_config_default();
    f = feature("POLYGON((0 0,10 0,10 5,15 5,10 5,10 10,0 10,0 0))");
    check(ck, &cfg, f, &out);
    assert_int_equal(count_code(&out, "geom.spike"), 1);
    assert_int_equal(count_code(&out, "geom.self-intersection"), 1);
    assert_int_equal(f->status, ST_STATUS_REPAIRED);
    assert_close(f->area_m2, 100 * UNIT_M2, 1e-4, "spike removed");
    double bbox[4];
    assert_true(st_geom_bbox(&f->geom, bbox));
    assert_near(bbox[2], 10 * UNIT, 1e-15, "spike tip gone");
    st_feature_free(f);
    st_findings_free(&out);
    st_footprint_checker_free(ck);
}

/* ---- kind, coordinates --------------------------------------------------- */

/* Checks wkt under the default config; expects 'status' and one 'code'. */
static void expect_one(st_footprint_checker *ck, const char *wkt, st_feature_status status,
                       const char *code, uint32_t flag)
{
    st_footprint_config cfg = st_footprint_config_default();
    st_findings out;
    st_findings_init(&out);
    st_feature *f = feature_at(wkt, 1.0, 0.0, 0.0);
    check(ck, &cfg, f, &out);
    if (f->status != status || count_code(&out, code) != 1 || !(f->flags & flag))
        fail_msg("%s: status %s, %d x %s, flags %#x", wkt, st_feature_status_name(f->status),
                 count_code(&out, code), code, f->flags);
    if (status == ST_STATUS_REJECTED)
        assert_non_null(f->reason);
    else
        assert_null(f->reason);
    st_feature_free(f);
    st_findings_free(&out);
}

static void test_kinds(void **state)
{
    (void)state;
    st_footprint_checker *ck = checker();
    expect_one(ck, "NULL", ST_STATUS_REJECTED, "geom.null", ST_FLAG_NULL);
    expect_one(ck, "POLYGON EMPTY", ST_STATUS_REJECTED, "geom.empty", ST_FLAG_EMPTY);
    expect_one(ck, "MULTIPOLYGON EMPTY", ST_STATUS_REJECTED, "geom.empty", ST_FLAG_EMPTY);
    expect_one(ck, "POINT(21.4 42)", ST_STATUS_REJECTED, "geom.wrong-type", ST_FLAG_WRONG_TYPE);
    expect_one(ck, "LINESTRING(21.4 42,21.5 42)", ST_STATUS_REJECTED, "geom.wrong-type",
               ST_FLAG_WRONG_TYPE);
    expect_one(ck, "MULTIPOINT((21.4 42),(21.5 42))", ST_STATUS_REJECTED, "geom.wrong-type",
               ST_FLAG_WRONG_TYPE);
    expect_one(ck, "GEOMETRYCOLLECTION(POINT(21.4 42))", ST_STATUS_REJECTED,
               "geom.wrong-type", ST_FLAG_WRONG_TYPE);
    /* a collection keeps its polygon, as a multipolygon once repaired */
    expect_one(ck, "GEOMETRYCOLLECTION(POINT(21.4 42),POLYGON((21.4 42,21.4002 42,"
                   "21.4002 42.0002,21.4 42.0002,21.4 42)))",
               ST_STATUS_REPAIRED, "geom.collection", ST_FLAG_WRONG_TYPE);
    expect_one(ck, "POLYGON((21.4 42,21.4002 42,NaN 42.0002,21.4 42))", ST_STATUS_REJECTED,
               "geom.bad-coordinate", ST_FLAG_BAD_COORD);
    expect_one(ck, "POLYGON((21.4 42,21.4002 42,inf 42.0002,21.4 42))", ST_STATUS_REJECTED,
               "geom.bad-coordinate", ST_FLAG_BAD_COORD);
    expect_one(ck, "POLYGON((21.4 90.5,21.4002 90.5,21.4002 90.5002,21.4 90.5))",
               ST_STATUS_REJECTED, "geom.out-of-range", ST_FLAG_OUT_OF_RANGE);
    expect_one(ck, "POLYGON((180.0001 0,180.0003 0,180.0003 0.0002,180.0001 0))",
               ST_STATUS_REJECTED, "geom.out-of-range", ST_FLAG_OUT_OF_RANGE);
    st_footprint_checker_free(ck);

    /* unmeasurable geometry has no area */
    ck = checker();
    st_footprint_config cfg = st_footprint_config_default();
    st_findings out;
    st_findings_init(&out);
    st_feature *f = st_feature_new();
    check(ck, &cfg, f, &out);
    assert_true(isnan(f->area_m2) && isnan(f->perimeter_m));
    assert_true(isnan(out.items[0].x));
    st_feature_free(f);
    st_findings_free(&out);
    st_footprint_checker_free(ck);
}

/* ---- swapped latitude and longitude ----------------------------------------- */

/* A layer of 21 small squares around (x0, y0), each 0.0002 deg. */
static void layer_extent(double x0, double y0, st_footprint_extent *ext)
{
    double xy[2 * 21];
    for (int i = 0; i < 21; i++) {
        char wkt[256];
        double x = x0 + 0.003 * (i % 7), y = y0 + 0.002 * (i / 7);
        snprintf(wkt, sizeof wkt, "POLYGON((%.6f %.6f,%.6f %.6f,%.6f %.6f,%.6f %.6f,%.6f %.6f))",
                 x, y, x + 0.0002, y, x + 0.0002, y + 0.0002, x, y + 0.0002, x, y);
        st_geom g = geom_of(wkt);
        assert_true(st_footprint_center(&g, xy + 2 * i));
        st_geom_clear(&g);
    }
    assert_int_equal(st_footprint_extent_compute(xy, 21, ext), ST_OK);
    assert_true(ext->valid);
    assert_true(ext->xmin < x0 && ext->xmax > x0 + 0.018);
}

static void test_swapped_axes(void **state)
{
    (void)state;
    st_footprint_extent ext;
    layer_extent(21.43, 41.99, &ext);
    st_footprint_checker *ck = checker();
    st_footprint_checker_set_extent(ck, &ext);
    st_footprint_config cfg = st_footprint_config_default();
    st_findings out;
    st_findings_init(&out);
    /* lat 41.99.. written as lon, lon 21.43.. as lat */
    const char *swapped = "POLYGON((41.995 21.44,41.995 21.4402,41.9952 21.4402,"
                          "41.9952 21.44,41.995 21.44))";
    st_feature *f = feature_at(swapped, 1.0, 0, 0);
    check(ck, &cfg, f, &out);
    const st_finding *x = find_code(&out, "geom.swapped-axes");
    assert_non_null(x);
    assert_non_null(strstr(x->message, "swapped"));
    assert_int_equal(f->status, ST_STATUS_REPAIRED);   /* make-valid swaps back */
    double c[2];
    assert_true(st_footprint_center(&f->geom, c));
    assert_true(c[0] > ext.xmin && c[0] < ext.xmax && c[1] > ext.ymin && c[1] < ext.ymax);
    st_feature_free(f);
    st_findings_free(&out);

    cfg.repair = ST_REPAIR_REJECT;
    f = feature_at(swapped, 1.0, 0, 0);
    check(ck, &cfg, f, &out);
    assert_int_equal(f->status, ST_STATUS_REJECTED);
    assert_non_null(strstr(f->reason, "swapped"));
    st_feature_free(f);
    st_findings_free(&out);

    cfg.repair = ST_REPAIR_KEEP;
    f = feature_at(swapped, 1.0, 0, 0);
    check(ck, &cfg, f, &out);
    assert_int_equal(f->status, ST_STATUS_OK);
    assert_true(f->flags & ST_FLAG_SWAPPED);
    st_feature_free(f);
    st_findings_free(&out);

    /* a far-away footprint whose swap does not land in the layer: not flagged */
    cfg = st_footprint_config_default();
    f = feature_at("POLYGON((100 10,100.0002 10,100.0002 10.0002,100 10))", 1.0, 0, 0);
    check(ck, &cfg, f, &out);
    assert_int_equal(count_code(&out, "geom.swapped-axes"), 0);
    st_feature_free(f);
    st_findings_free(&out);
    /* no extent: no check */
    st_footprint_checker_set_extent(ck, NULL);
    f = feature_at(swapped, 1.0, 0, 0);
    check(ck, &cfg, f, &out);
    assert_int_equal(count_code(&out, "geom.swapped-axes"), 0);
    st_feature_free(f);
    st_findings_free(&out);
    st_footprint_checker_free(ck);
}

/* A layer near the antimeridian: swapped, latitude becomes 178 -- out of
** range, and the message says why. */
static void test_swapped_out_of_range(void **state)
{
    (void)state;
    st_footprint_extent ext;
    layer_extent(178.40, -17.80, &ext);
    st_footprint_checker *ck = checker();
    st_footprint_checker_set_extent(ck, &ext);
    st_footprint_config cfg = st_footprint_config_default();
    cfg.repair = ST_REPAIR_KEEP;
    st_findings out;
    st_findings_init(&out);
    const char *swapped = "POLYGON((-17.79 178.41,-17.7898 178.41,-17.7898 178.4102,-17.79 178.41))";
    st_feature *f = feature_at(swapped, 1.0, 0, 0);
    check(ck, &cfg, f, &out);
    assert_int_equal(f->status, ST_STATUS_REJECTED);
    assert_true(f->flags & ST_FLAG_SWAPPED && f->flags & ST_FLAG_OUT_OF_RANGE);
    assert_non_null(strstr(find_code(&out, "geom.out-of-range")->message, "swapped"));
    assert_non_null(strstr(f->reason, "swapped"));
    st_feature_free(f);
    st_findings_free(&out);
    cfg.repair = ST_REPAIR_MAKE_VALID;
    f = feature_at(swapped, 1.0, 0, 0);
    check(ck, &cfg, f, &out);
    assert_int_equal(f->status, ST_STATUS_REPAIRED);
    assert_near(f->geom.xy[0], 178.41, 1e-12, "lon swapped back");
    st_feature_free(f);
    st_findings_free(&out);
    st_footprint_checker_free(ck);
}

static void test_extent_robust(void **state)
{
    (void)state;
    /* 20 points in a 0.1 deg box and 3 wild ones: the extent ignores them */
    double xy[2 * 23];
    for (int i = 0; i < 20; i++) {
        xy[2 * i] = 10.0 + 0.005 * i;
        xy[2 * i + 1] = 50.0 + 0.005 * (19 - i);
    }
    const double wild[] = {50.0, 10.0, -120.0, 80.0, NAN, 3.0};
    memcpy(xy + 40, wild, sizeof wild);
    st_footprint_extent e;
    assert_int_equal(st_footprint_extent_compute(xy, 23, &e), ST_OK);
    assert_true(e.valid);
    assert_true(e.xmin > 9.8 && e.xmax < 10.3 && e.ymin > 49.8 && e.ymax < 50.3);
    assert_int_equal(st_footprint_extent_compute(xy, 4, &e), ST_OK);
    assert_false(e.valid);
}

/* ---- thresholds and settings ---------------------------------------------- */

static void test_thresholds(void **state)
{
    (void)state;
    st_footprint_checker *ck = checker();
    st_footprint_config cfg = st_footprint_config_default();
    st_findings out;
    st_findings_init(&out);
    /* 2 x 2.5 m = 5 m2: a fragment under the default 6 m2 */
    const double shed[] = {0, 0, 2.5, 0, 2.5, 2, 0, 2};
    st_feature *f = metric_feature(shed, 4);
    check(ck, &cfg, f, &out);
    assert_true(f->flags & ST_FLAG_FRAGMENT);
    assert_int_equal(count_code(&out, "shape.fragment"), 1);
    assert_int_equal(f->status, ST_STATUS_OK);
    st_feature_free(f);
    st_findings_free(&out);
    const st_severity note = ST_SEV_NOTE;
    assert_int_equal(st_footprint_config_set(&cfg, "min-area", 4, "m2", &note, NULL, 0), ST_OK);
    f = metric_feature(shed, 4);
    check(ck, &cfg, f, &out);
    assert_int_equal(count_code(&out, "shape.fragment"), 0);
    st_feature_free(f);
    st_findings_free(&out);
    /* 400 x 400 m = 16 ha: oversize under the default 10 ha, not under 20 ha */
    const double hall[] = {0, 0, 400, 0, 400, 400, 0, 400};
    f = metric_feature(hall, 4);
    cfg = st_footprint_config_default();
    check(ck, &cfg, f, &out);
    assert_int_equal(count_code(&out, "shape.oversize"), 1);
    st_feature_free(f);
    st_findings_free(&out);
    assert_int_equal(st_footprint_config_set(&cfg, "max-area", 20, "ha", NULL, NULL, 0), ST_OK);
    f = metric_feature(hall, 4);
    check(ck, &cfg, f, &out);
    assert_int_equal(count_code(&out, "shape.oversize"), 0);
    st_feature_free(f);
    st_findings_free(&out);
    /* 1 x 10 m (compactness 0.26) is a sliver once the threshold is 0.3 */
    const double thin[] = {0, 0, 10, 0, 10, 1, 0, 1};
    cfg = st_footprint_config_default();
    assert_int_equal(st_footprint_config_set(&cfg, "min-compactness", 0.3, "", NULL, NULL, 0),
                     ST_OK);
    f = metric_feature(thin, 4);
    check(ck, &cfg, f, &out);
    assert_int_equal(count_code(&out, "shape.sliver"), 1);
    st_feature_free(f);
    st_findings_free(&out);
    /* a 1200-gon of 20 m radius: too many vertices under 1000, not under 2000 */
    double ring[2 * 1200];
    for (int i = 0; i < 1200; i++) {
        ring[2 * i] = 20.0 * cos(2 * M_PI * i / 1200);
        ring[2 * i + 1] = 20.0 * sin(2 * M_PI * i / 1200);
    }
    cfg = st_footprint_config_default();
    f = metric_feature(ring, 1200);
    check(ck, &cfg, f, &out);
    assert_int_equal(count_code(&out, "shape.too-many-vertices"), 1);
    assert_close(st_footprint_compactness(f->area_m2, f->perimeter_m), 1.0, 1e-5, "circle");
    st_feature_free(f);
    st_findings_free(&out);
    assert_int_equal(st_footprint_config_set(&cfg, "max-vertices", 2000, NULL, NULL, NULL, 0),
                     ST_OK);
    f = metric_feature(ring, 1200);
    check(ck, &cfg, f, &out);
    assert_int_equal(count_code(&out, "shape.too-many-vertices"), 0);
    st_feature_free(f);
    st_findings_free(&out);
    st_footprint_checker_free(ck);
}

static void test_settings_by_name(void **state)
{
    (void)state;
    st_footprint_config cfg = st_footprint_config_default();
    assert_int_equal(cfg.repair, ST_REPAIR_MAKE_VALID);
    assert_int_equal(cfg.method, ST_REPAIR_STRUCTURE);
    char err[128];
    const st_severity error = ST_SEV_ERROR;
    assert_int_equal(st_footprint_config_set(&cfg, "min-area", 6, "m2", &error, err, sizeof err),
                     ST_OK);
    assert_int_equal(cfg.severity[ST_FP_FRAGMENT], ST_SEV_ERROR);
    assert_int_equal(st_footprint_config_set(&cfg, "min-area", 0.5, "ha", NULL, err, sizeof err),
                     ST_OK);
    assert_near(cfg.min_area_m2, 5000, 1e-9, "ha");
    assert_int_equal(st_footprint_config_set(&cfg, "max-area-change", 5, "%", NULL, err, sizeof err),
                     ST_OK);
    assert_near(cfg.max_area_change, 0.05, 1e-12, "%");
    st_footprint_config before = cfg;
    assert_int_equal(st_footprint_config_set(&cfg, "min-aera", 6, "m2", NULL, err, sizeof err),
                     ST_ERR_USAGE);
    assert_non_null(strstr(err, "min-aera"));
    assert_int_equal(st_footprint_config_set(&cfg, "min-area", 6, "ft2", NULL, err, sizeof err),
                     ST_ERR_USAGE);
    assert_non_null(strstr(err, "m2"));
    assert_int_equal(st_footprint_config_set(&cfg, "min-compactness", 1.5, "", NULL, err, sizeof err),
                     ST_ERR_USAGE);
    assert_int_equal(st_footprint_config_set(&cfg, "max-vertices", 3, "", NULL, err, sizeof err),
                     ST_ERR_USAGE);
    assert_int_equal(st_footprint_config_set(&cfg, "max-vertices", 10.5, "", NULL, err, sizeof err),
                     ST_ERR_USAGE);
    assert_int_equal(st_footprint_config_set(&cfg, "spike-angle", NAN, "deg", NULL, err, sizeof err),
                     ST_ERR_USAGE);
    assert_memory_equal(&before, &cfg, sizeof cfg);
    assert_int_equal(st_footprint_config_set_word(&cfg, "repair", "keep", err, sizeof err), ST_OK);
    assert_int_equal(cfg.repair, ST_REPAIR_KEEP);
    assert_int_equal(st_footprint_config_set_word(&cfg, "repair", "fix", err, sizeof err),
                     ST_ERR_USAGE);
    assert_int_equal(st_footprint_config_set_word(&cfg, "repair-method", "linework", err,
                                                  sizeof err), ST_OK);
    assert_int_equal(cfg.method, ST_REPAIR_LINEWORK);
    assert_int_equal(st_footprint_config_set_severity(&cfg, "geom.spike", ST_SEV_ERROR, err,
                                                      sizeof err), ST_OK);
    assert_int_equal(cfg.severity[ST_FP_SPIKE], ST_SEV_ERROR);
    assert_int_equal(st_footprint_config_set_severity(&cfg, "geom.spik", ST_SEV_ERROR, err,
                                                      sizeof err), ST_ERR_USAGE);
    /* the severity set is the one findings carry */
    st_footprint_checker *ck = checker();
    cfg = st_footprint_config_default();
    assert_int_equal(st_footprint_config_set_severity(&cfg, "geom.self-intersection",
                                                      ST_SEV_WARNING, NULL, 0), ST_OK);
    st_findings out;
    st_findings_init(&out);
    st_feature *f = feature("POLYGON((0 0,10 10,10 0,0 10,0 0))");
    check(ck, &cfg, f, &out);
    assert_int_equal(find_code(&out, "geom.self-intersection")->severity, ST_SEV_WARNING);
    st_feature_free(f);
    st_findings_free(&out);
    st_footprint_checker_free(ck);
}

/* Every code is named and described in docs/findings.md. */
static void test_codes_documented(void **state)
{
    (void)state;
    FILE *fp = fopen("docs/findings.md", "r");
    assert_non_null(fp);
    static char doc[65536];
    size_t n = fread(doc, 1, sizeof doc - 1, fp);
    doc[n] = '\0';
    fclose(fp);
    for (int c = 0; c < ST_FP_NCODES; c++) {
        char quoted[80];
        const char *name = st_footprint_code_name((st_fp_code)c);
        snprintf(quoted, sizeof quoted, "`%s`", name);
        if (!strstr(doc, quoted))
            fail_msg("%s is not in docs/findings.md", name);
        assert_int_equal(st_footprint_code_find(name), c);
    }
    assert_int_equal(st_footprint_code_find("geom.nothing"), -1);
}

/* ---- repair details -------------------------------------------------------- */

/* An uneven bow-tie at 1e-5 deg a unit: lobes of 0.56 m2 and 56 m2. The
** small lobe is below min-area and dropped; with min-area 0 both stay. */
static void test_repair_drops_fragments(void **state)
{
    (void)state;
    const char *wkt = "POLYGON((0 0,10 10,10 0,0 1,0 0))";
    st_footprint_checker *ck = checker();
    st_footprint_config cfg = st_footprint_config_default();
    st_findings out;
    st_findings_init(&out);
    st_feature *f = feature_at(wkt, 1e-5, 0.0, 0.0);
    check(ck, &cfg, f, &out);
    assert_int_equal(f->status, ST_STATUS_REPAIRED);
    assert_int_equal(f->geom.type, ST_GEOM_POLYGON);
    assert_int_equal(f->geom.nparts, 1);
    assert_non_null(find_code(&out, "repair.parts-dropped"));
    const double unit_m2 = 1e-10 * M_PER_DEG_LON * M_PER_DEG_LAT;
    assert_close(f->area_m2, 0.5 * 10 * (10 - 10 / 11.0) * unit_m2, 1e-4, "large lobe");
    st_feature_free(f);
    st_findings_free(&out);
    cfg.min_area_m2 = 0;
    f = feature_at(wkt, 1e-5, 0.0, 0.0);
    check(ck, &cfg, f, &out);
    assert_int_equal(f->geom.nparts, 2);
    assert_null(find_code(&out, "repair.parts-dropped"));
    st_feature_free(f);
    st_findings_free(&out);
    st_footprint_checker_free(ck);
}

/* A bow-tie across the antimeridian is repaired in unwrapped longitudes and
** comes back in -180..180; a valid footprint there is not "invalid". */
static void test_antimeridian(void **state)
{
    (void)state;
    st_footprint_checker *ck = checker();
    st_footprint_config cfg = st_footprint_config_default();
    st_findings out;
    st_findings_init(&out);
    st_feature *f = feature_at("POLYGON((179.99995 -16,-179.99995 -16,-179.99995 -15.9999,"
                               "179.99995 -15.9999,179.99995 -16))", 1.0, 0, 0);
    check(ck, &cfg, f, &out);
    assert_int_equal(f->status, ST_STATUS_OK);
    assert_int_equal(f->flags & ST_FLAG_INVALID, 0);
    assert_near(f->area_m2, 118.4429, 1e-4, "antimeridian footprint");  /* COMP, row 17 */
    st_feature_free(f);
    st_findings_free(&out);

    f = feature_at("POLYGON((179.9999 0,-179.9999 0.0002,-179.9999 0,179.9999 0.0002,"
                   "179.9999 0))", 1.0, 0, 0);
    check(ck, &cfg, f, &out);
    assert_int_equal(count_code(&out, "geom.self-intersection"), 1);
    const st_finding *x = find_code(&out, "geom.self-intersection");
    assert_near(x->x, 180.0, 1e-9, "crossing at the antimeridian");
    assert_int_equal(f->status, ST_STATUS_REPAIRED);
    for (uint32_t i = 0; i < f->geom.ncoords; i++)
        assert_true(fabs(f->geom.xy[2 * i]) <= 180.0);
    double box, p;
    measure(ck, "POLYGON((179.9999 0,180.0001 0,180.0001 0.0002,179.9999 0.0002,179.9999 0))",
            &box, &p);
    assert_close(f->area_m2, box / 2, 1e-4, "two lobes, half the box");
    st_feature_free(f);
    st_findings_free(&out);
    st_footprint_checker_free(ck);
}

/* Checking twice keeps the geometry as first read. */
static void test_recheck_keeps_source(void **state)
{
    (void)state;
    st_footprint_checker *ck = checker();
    st_footprint_config cfg = st_footprint_config_default();
    st_findings out;
    st_findings_init(&out);
    st_feature *f = feature("POLYGON((0 0,10 0,10 10,0 10))");
    check(ck, &cfg, f, &out);
    check(ck, &cfg, f, &out);
    assert_non_null(f->source_geom);
    assert_int_equal(f->source_geom->ncoords, 4);
    assert_true(f->flags & ST_FLAG_REPLACED);
    assert_ptr_equal(st_footprint_source_geom(f), f->source_geom);
    st_feature_free(f);
    st_findings_free(&out);
    st_footprint_checker_free(ck);
}

/* Two findings lists hold the same codes, messages, points and bids. */
static void assert_same_findings(const st_findings *a, const st_findings *b)
{
    assert_int_equal(a->count, b->count);
    for (size_t i = 0; i < a->count; i++) {
        assert_string_equal(a->items[i].code, b->items[i].code);
        assert_string_equal(a->items[i].message, b->items[i].message);
        assert_int_equal(a->items[i].bid, b->items[i].bid);
        assert_memory_equal(&a->items[i].x, &b->items[i].x, sizeof a->items[i].x);
        assert_memory_equal(&a->items[i].y, &b->items[i].y, sizeof a->items[i].y);
    }
}

static void assert_same_feature(const st_feature *a, const st_feature *b)
{
    assert_int_equal(a->status, b->status);
    assert_int_equal(a->flags, b->flags);
    assert_memory_equal(&a->area_m2, &b->area_m2, sizeof a->area_m2);
    assert_memory_equal(&a->perimeter_m, &b->perimeter_m, sizeof a->perimeter_m);
    assert_int_equal(!a->reason, !b->reason);
    if (a->reason)
        assert_string_equal(a->reason, b->reason);
    assert_int_equal(a->geom.ncoords, b->geom.ncoords);
    assert_memory_equal(a->geom.xy, b->geom.xy, 2 * (size_t)a->geom.ncoords * sizeof *a->geom.xy);
    assert_int_equal(!a->source_geom, !b->source_geom);
    if (a->source_geom) {
        assert_int_equal(a->source_geom->type, b->source_geom->type);
        assert_int_equal(a->source_geom->ncoords, b->source_geom->ncoords);
    }
}

/* What the footprint stage does while reading: check with no extent; then,
** for a suspect, reset and check again with the extent. The outcome is the
** one of a check with the extent from the start, under every policy; a
** footprint that is not a suspect comes out the same with or without it. */
static void test_check_before_extent(void **state)
{
    (void)state;
    st_footprint_extent ext;
    layer_extent(21.43, 41.99, &ext);
    const char *wkts[] = {
        /* swapped, swapped with a bow-tie, swapped and unclosed */
        "POLYGON((41.995 21.44,41.995 21.4402,41.9952 21.4402,41.9952 21.44,41.995 21.44))",
        "POLYGON((41.995 21.44,41.9952 21.4402,41.9952 21.44,41.995 21.4402,41.995 21.44))",
        "POLYGON((41.995 21.44,41.995 21.4402,41.9952 21.4402,41.9952 21.44))",
        /* in the layer: clean, bow-tie, fragment */
        "POLYGON((21.44 41.995,21.4402 41.995,21.4402 41.9952,21.44 41.9952,21.44 41.995))",
        "POLYGON((21.44 41.995,21.4402 41.9952,21.4402 41.995,21.44 41.9952,21.44 41.995))",
        "POLYGON((21.44 41.995,21.44001 41.995,21.44001 41.99501,21.44 41.995))",
        /* far away, its swap outside the layer too */
        "POLYGON((100 10,100.0002 10,100.0002 10.0002,100 10))",
    };
    const int suspect[] = {1, 1, 1, 0, 0, 0, 0};
    st_repair_policy pols[] = {ST_REPAIR_MAKE_VALID, ST_REPAIR_REJECT, ST_REPAIR_KEEP};
    st_footprint_checker *ck = checker();
    for (size_t p = 0; p < 3; p++) {
        st_footprint_config cfg = st_footprint_config_default();
        cfg.repair = pols[p];
        for (size_t w = 0; w < sizeof wkts / sizeof wkts[0]; w++) {
            st_findings want, got;
            st_findings_init(&want);
            st_findings_init(&got);
            st_feature *a = feature_at(wkts[w], 1.0, 0, 0);
            st_footprint_checker_set_extent(ck, &ext);
            check(ck, &cfg, a, &want);
            assert_int_equal(count_code(&want, "geom.swapped-axes"), suspect[w]);
            st_feature *b = feature_at(wkts[w], 1.0, 0, 0);
            st_footprint_checker_set_extent(ck, NULL);
            check(ck, &cfg, b, &got);
            assert_int_equal(count_code(&got, "geom.swapped-axes"), 0);
            assert_int_equal(st_footprint_swap_suspect(&ext, b), suspect[w]);
            assert_int_equal(st_footprint_swap_suspect(NULL, b), 0);
            if (suspect[w]) {
                st_findings_free(&got);
                st_footprint_reset(b);
                assert_int_equal(b->status, ST_STATUS_OK);
                assert_null(b->reason);
                assert_int_equal(b->flags, 0);
                assert_null(b->source_geom);
                st_footprint_checker_set_extent(ck, &ext);
                check(ck, &cfg, b, &got);
            }
            assert_same_feature(a, b);
            assert_same_findings(&want, &got);
            st_feature_free(a);
            st_feature_free(b);
            st_findings_free(&want);
            st_findings_free(&got);
        }
    }
    st_footprint_checker_free(ck);
}

/* ---- allocation failure ---------------------------------------------------- */

static void nomem_loop(const char *wkt, st_repair_policy policy)
{
    st_footprint_config cfg = st_footprint_config_default();
    cfg.repair = policy;
    int done = 0;
    for (long n = 1; !done && n < 1000; n++) {
        st_findings out;
        st_findings_init(&out);
        st_feature *f = feature(wkt);
        uint32_t nc = f->geom.ncoords;
        st_footprint_checker *ck = NULL;
        st_alloc_fail_after(n);
        st_status rc = st_footprint_checker_new(&ck);
        if (rc == ST_OK)
            rc = st_footprint_check(ck, &cfg, f, &out);
        long used = st_alloc_count();
        st_alloc_fail_after(0);
        if (rc == ST_OK) {
            /* success only once no allocation was made to fail: a failure
            ** must never be swallowed */
            assert_true(used < n);
            done = 1;
        } else {
            assert_int_equal(rc, ST_ERR_NOMEM);
            assert_int_equal(out.count, 0);
            assert_int_equal(f->geom.ncoords, nc);
            assert_null(f->source_geom);
            assert_null(f->reason);
            assert_int_equal(f->status, ST_STATUS_OK);
        }
        st_footprint_checker_free(ck);
        st_findings_free(&out);
        st_feature_free(f);
    }
    assert_true(done);
}

static void test_nomem(void **state)
{
    (void)state;
    nomem_loop("POLYGON((0 0,10 10,10 0,0 10,0 0))", ST_REPAIR_MAKE_VALID);
    nomem_loop("POLYGON((0 0,10 0,10 0,10 10,0 10))", ST_REPAIR_MAKE_VALID);
    nomem_loop("POLYGON((0 0,10 10,10 0,0 10,0 0))", ST_REPAIR_REJECT);
    double xy[10] = {0, 0, 1, 1, 2, 2, 3, 3, 4, 4};
    st_footprint_extent e;
    for (long n = 1; n <= 2; n++) {
        st_alloc_fail_after(n);
        st_status rc = st_footprint_extent_compute(xy, 5, &e);
        st_alloc_fail_after(0);
        assert_int_equal(rc, ST_ERR_NOMEM);
    }
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_check_before_extent),
        cmocka_unit_test(test_invalid_cases_structure),
        cmocka_unit_test(test_invalid_cases_linework),
        cmocka_unit_test(test_invalid_cases_reject_and_keep),
        cmocka_unit_test(test_invalid_location),
        cmocka_unit_test(test_geodesic_vs_pyproj),
        cmocka_unit_test(test_geodesic_published),
        cmocka_unit_test(test_geodesic_analytic_cell),
        cmocka_unit_test(test_compactness),
        cmocka_unit_test(test_unclosed_ring),
        cmocka_unit_test(test_repeated_vertices),
        cmocka_unit_test(test_spikes),
        cmocka_unit_test(test_kinds),
        cmocka_unit_test(test_swapped_axes),
        cmocka_unit_test(test_swapped_out_of_range),
        cmocka_unit_test(test_extent_robust),
        cmocka_unit_test(test_thresholds),
        cmocka_unit_test(test_settings_by_name),
        cmocka_unit_test(test_codes_documented),
        cmocka_unit_test(test_repair_drops_fragments),
        cmocka_unit_test(test_antimeridian),
        cmocka_unit_test(test_recheck_keeps_source),
        cmocka_unit_test(test_nomem),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
