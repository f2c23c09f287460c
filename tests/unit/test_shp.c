/*
** tests/unit/test_shp.c -- the Shapefile reader and writer (io/shp.c).
**
** Fixtures are built inside each test with Shapelib's own SHPCreate and
** DBFCreate in a fresh folder under /tmp, so every byte of them is known.
** Ring orientation follows the Shapefile Technical Description (ESRI, July
** 1998): shells clockwise (negative shoelace area), holes counter-clockwise.
** The real extracts are checked against GDAL: feature counts from
** `ogrinfo -ro -so -al` and every 'name' value from `ogrinfo -ro -al -q`.
** Their folder is $ST_REAL_DATA, else ../shared/data/real (the checkout's
** sibling, as tests/e2e/lib.sh resolves it); without it or without
** ogrinfo those tests are skipped.
*/
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <dirent.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <strings.h>
#include <sys/stat.h>
#include <unistd.h>
#include <cmocka.h>

#include <shapefil.h>

#include "stocktake/core.h"
#include "stocktake/feature.h"
#include "stocktake/io.h"

/* ---- helpers ------------------------------------------------------------ */

static void make_dir(char *dir, size_t n)
{
    snprintf(dir, n, "/tmp/st_shp_XXXXXX");
    assert_non_null(mkdtemp(dir));
}

/* Number of entries in 'dir' (hidden ones too), '.' and '..' aside. */
static int count_entries(const char *dir)
{
    DIR *d = opendir(dir);
    assert_non_null(d);
    int n = 0;
    struct dirent *e;
    while ((e = readdir(d)))
        if (strcmp(e->d_name, ".") != 0 && strcmp(e->d_name, "..") != 0)
            n++;
    closedir(d);
    return n;
}

static void remove_dir(const char *dir)
{
    DIR *d = opendir(dir);
    if (!d)
        return;
    struct dirent *e;
    char path[512];
    while ((e = readdir(d)))
        if (strcmp(e->d_name, ".") != 0 && strcmp(e->d_name, "..") != 0) {
            snprintf(path, sizeof path, "%s/%s", dir, e->d_name);
            remove(path);
        }
    closedir(d);
    rmdir(dir);
}

static void write_file(const char *dir, const char *name, const char *text)
{
    char path[512];
    snprintf(path, sizeof path, "%s/%s", dir, name);
    FILE *fp = fopen(path, "wb");
    assert_non_null(fp);
    assert_int_equal(fwrite(text, 1, strlen(text), fp), strlen(text));
    assert_int_equal(fclose(fp), 0);
}

static int file_exists(const char *dir, const char *name)
{
    char path[512];
    struct stat st;
    snprintf(path, sizeof path, "%s/%s", dir, name);
    return stat(path, &st) == 0;
}

static const char prj_wgs84[] =
    "GEOGCS[\"GCS_WGS_1984\",DATUM[\"D_WGS_1984\",SPHEROID[\"WGS_1984\","
    "6378137,298.257223563]],PRIMEM[\"Greenwich\",0],UNIT[\"Degree\","
    "0.017453292519943295]]";

/* A ring as x,y pairs. */
typedef struct ring { const double *xy; int n; } ring;

/* Rings as (x0,y0)-(x1,y1) boxes: clockwise or counter-clockwise. */
static const double cw_0_10[] = {0, 0, 0, 10, 10, 10, 10, 0, 0, 0};
static const double ccw_2_4[] = {2, 2, 4, 2, 4, 4, 2, 4, 2, 2};
static const double cw_0_100[] = {0, 0, 0, 100, 100, 100, 100, 0, 0, 0};
static const double ccw_10_90[] = {10, 10, 90, 10, 90, 90, 10, 90, 10, 10};
static const double cw_20_80[] = {20, 20, 20, 80, 80, 80, 80, 20, 20, 20};
static const double ccw_40_60[] = {40, 40, 60, 40, 60, 60, 40, 60, 40, 40};
static const double cw_200_210[] = {200, 200, 200, 210, 210, 210, 210, 200, 200, 200};
static const double ccw_20_30[] = {20, 20, 30, 20, 30, 30, 20, 30, 20, 20};

/* Append one shape of 'type' made of 'rings' (Z = 5 when the type has Z). */
static void add_shape(SHPHandle h, int type, const ring *rings, int nrings)
{
    int starts[16];
    double x[256], y[256], z[256], m[256];
    int n = 0;
    for (int r = 0; r < nrings; r++) {
        starts[r] = n;
        for (int i = 0; i < rings[r].n; i++, n++) {
            x[n] = rings[r].xy[2 * i];
            y[n] = rings[r].xy[2 * i + 1];
            z[n] = 5.0;
            m[n] = 7.0;
        }
    }
    int has_z = type == SHPT_POLYGONZ, has_m = type == SHPT_POLYGONM;
    SHPObject *o = type == SHPT_NULL
        ? SHPCreateObject(SHPT_NULL, -1, 0, NULL, NULL, 0, NULL, NULL, NULL, NULL)
        : SHPCreateObject(type, -1, nrings, starts, NULL, n, x, y,
                          has_z ? z : NULL, has_m ? m : NULL);
    assert_non_null(o);
    assert_true(SHPWriteObject(h, -1, o) >= 0);
    SHPDestroyObject(o);
}

/* A layer 'name' in 'dir' with one text field 'name' per record. */
static SHPHandle create_layer(const char *dir, const char *name, int type, DBFHandle *dbf)
{
    char path[512];
    snprintf(path, sizeof path, "%s/%s", dir, name);
    SHPHandle h = SHPCreate(path, type);
    assert_non_null(h);
    *dbf = DBFCreate(path);
    assert_non_null(*dbf);
    assert_int_equal(DBFAddField(*dbf, "name", FTString, 20, 0), 0);
    char prj[64];
    snprintf(prj, sizeof prj, "%s.prj", name);
    write_file(dir, prj, prj_wgs84);
    return h;
}

static void add_record(DBFHandle dbf, const char *value)
{
    int rec = DBFGetRecordCount(dbf);
    assert_true(DBFWriteStringAttribute(dbf, rec, 0, value));
}

/* Open with keep_source_crs: until the CRS module lands, the placeholder
** refuses to reproject. */
static st_status open_layer(const char *dir, const char *file, st_diags *d, st_reader **r)
{
    char path[512];
    snprintf(path, sizeof path, "%s/%s", dir, file);
    st_read_options o = ST_READ_OPTIONS_DEFAULT;
    o.keep_source_crs = 1;
    return st_reader_open(path, &o, d, r);
}

static st_feature *next_feature(st_reader *r)
{
    st_feature *f = NULL;
    assert_int_equal(st_reader_next(r, &f), ST_OK);
    assert_non_null(f);
    return f;
}

/* Signed area of ring k of part p (counter-clockwise positive). */
static double part_ring_area(const st_geom *g, uint32_t p, uint32_t k)
{
    assert_true(p < g->nparts);
    uint32_t r = g->part_ring[p] + k;
    assert_true(r < g->part_ring[p + 1]);
    return st_geom_ring_signed_area(g, r);
}

/* ---- reader: rings ----------------------------------------------------- */

static void test_read_polygon_with_hole(void **state)
{
    (void)state;
    char dir[64];
    make_dir(dir, sizeof dir);
    DBFHandle dbf;
    SHPHandle h = create_layer(dir, "a", SHPT_POLYGON, &dbf);
    ring rings[] = {{ccw_2_4, 5}, {cw_0_10, 5}};   /* the hole comes first */
    add_shape(h, SHPT_POLYGON, rings, 2);
    add_record(dbf, "house");
    /* A hole whose first vertex lies on the shell's edge (valid OGC). */
    static const double ccw_touching[] = {0, 5, 3, 4, 3, 6, 0, 5};
    ring touching[] = {{cw_0_10, 5}, {ccw_touching, 4}};
    add_shape(h, SHPT_POLYGON, touching, 2);
    add_record(dbf, "touching");
    SHPClose(h);
    DBFClose(dbf);

    st_diags d;
    st_diags_init(&d);
    st_reader *r = NULL;
    assert_int_equal(open_layer(dir, "a.shp", &d, &r), ST_OK);
    assert_string_equal(st_reader_format_name(r), "shapefile");
    assert_int_equal(st_reader_count_hint(r), 2);
    assert_true(st_reader_schema_fixed(r));
    /* the .prj names WGS 84 geographic: identified as EPSG:4326 by PROJ */
    assert_string_equal(st_reader_crs(r), "EPSG:4326");
    st_feature *f = next_feature(r);
    assert_int_equal(f->geom.type, ST_GEOM_POLYGON);
    assert_int_equal(f->geom.nparts, 1);
    assert_int_equal(f->geom.nrings, 2);
    assert_true(part_ring_area(&f->geom, 0, 0) == -100.0);   /* shell first */
    assert_true(part_ring_area(&f->geom, 0, 1) == 4.0);
    assert_string_equal(f->source_id, "1");
    assert_string_equal(st_feature_value(f, 0), "house");
    st_feature_free(f);
    f = next_feature(r);
    assert_int_equal(f->geom.type, ST_GEOM_POLYGON);
    assert_int_equal(f->geom.nrings, 2);
    assert_true(part_ring_area(&f->geom, 0, 1) == 3.0);
    st_feature_free(f);
    assert_int_equal(st_reader_next(r, &f), ST_OK);
    assert_null(f);
    long long done, total;
    st_reader_progress(r, &done, &total);
    assert_true(total > 100 && done == total);
    st_reader_close(r);
    assert_int_equal(d.count, 0);
    st_diags_free(&d);
    remove_dir(dir);
}

/* Shell A holds hole H1, which holds island B with its hole H2: H2 lies
** in both A and B and must go to the smaller, B. C is a second island. */
static void test_read_multipolygon_smallest_shell(void **state)
{
    (void)state;
    char dir[64];
    make_dir(dir, sizeof dir);
    DBFHandle dbf;
    SHPHandle h = create_layer(dir, "m", SHPT_POLYGON, &dbf);
    ring rings[] = {{ccw_40_60, 5}, {cw_0_100, 5}, {cw_200_210, 5},
                    {ccw_10_90, 5}, {cw_20_80, 5}};
    add_shape(h, SHPT_POLYGON, rings, 5);
    add_record(dbf, "x");
    SHPClose(h);
    DBFClose(dbf);

    st_diags d;
    st_diags_init(&d);
    st_reader *r = NULL;
    assert_int_equal(open_layer(dir, "m.shp", &d, &r), ST_OK);
    st_feature *f = next_feature(r);
    const st_geom *g = &f->geom;
    assert_int_equal(g->type, ST_GEOM_MULTIPOLYGON);
    assert_int_equal(g->nparts, 3);                 /* shells in file order */
    assert_int_equal(g->part_ring[1] - g->part_ring[0], 2);
    assert_true(part_ring_area(g, 0, 0) == -10000.0);
    assert_true(part_ring_area(g, 0, 1) == 6400.0);
    assert_int_equal(g->part_ring[2] - g->part_ring[1], 1);
    assert_true(part_ring_area(g, 1, 0) == -100.0);
    assert_int_equal(g->part_ring[3] - g->part_ring[2], 2);
    assert_true(part_ring_area(g, 2, 0) == -3600.0);
    assert_true(part_ring_area(g, 2, 1) == 400.0);
    st_feature_free(f);
    st_reader_close(r);
    st_diags_free(&d);
    remove_dir(dir);
}

static void test_read_hole_without_shell_is_kept(void **state)
{
    (void)state;
    char dir[64];
    make_dir(dir, sizeof dir);
    DBFHandle dbf;
    SHPHandle h = create_layer(dir, "o", SHPT_POLYGON, &dbf);
    ring outside[] = {{cw_0_10, 5}, {ccw_20_30, 5}};
    add_shape(h, SHPT_POLYGON, outside, 2);
    add_record(dbf, "outside");
    ring alone[] = {{ccw_20_30, 5}};
    add_shape(h, SHPT_POLYGON, alone, 1);
    add_record(dbf, "alone");
    SHPClose(h);
    DBFClose(dbf);

    st_diags d;
    st_diags_init(&d);
    st_reader *r = NULL;
    assert_int_equal(open_layer(dir, "o.shp", &d, &r), ST_OK);
    st_feature *f = next_feature(r);
    assert_int_equal(f->geom.type, ST_GEOM_MULTIPOLYGON);
    assert_int_equal(f->geom.nparts, 2);
    assert_true(part_ring_area(&f->geom, 0, 0) == -100.0);
    assert_true(part_ring_area(&f->geom, 1, 0) == 100.0);   /* as read */
    st_feature_free(f);
    f = next_feature(r);
    assert_int_equal(f->geom.type, ST_GEOM_POLYGON);
    assert_int_equal(f->geom.nrings, 1);
    assert_int_equal(f->geom.ncoords, 5);
    st_feature_free(f);
    st_reader_close(r);
    st_diags_free(&d);
    remove_dir(dir);
}

static void test_read_polygon_z_and_m(void **state)
{
    (void)state;
    char dir[64];
    make_dir(dir, sizeof dir);
    static const int types[] = {SHPT_POLYGONZ, SHPT_POLYGONM};
    for (int t = 0; t < 2; t++) {
        DBFHandle dbf;
        SHPHandle h = create_layer(dir, "z", types[t], &dbf);
        ring rings[] = {{cw_0_10, 5}};
        add_shape(h, types[t], rings, 1);
        add_record(dbf, "z");
        SHPClose(h);
        DBFClose(dbf);
        st_diags d;
        st_diags_init(&d);
        st_reader *r = NULL;
        assert_int_equal(open_layer(dir, "z.shp", &d, &r), ST_OK);
        st_feature *f = next_feature(r);
        assert_int_equal(f->geom.type, ST_GEOM_POLYGON);
        assert_int_equal(f->geom.has_z, types[t] == SHPT_POLYGONZ);
        assert_int_equal(f->geom.has_m, types[t] == SHPT_POLYGONM);
        assert_int_equal(f->geom.ncoords, 5);
        assert_memory_equal(f->geom.xy, cw_0_10, sizeof cw_0_10);   /* Z, M dropped */
        st_feature_free(f);
        st_reader_close(r);
        st_diags_free(&d);
    }
    remove_dir(dir);
}

static void test_read_null_shape_is_carried(void **state)
{
    (void)state;
    char dir[64];
    make_dir(dir, sizeof dir);
    DBFHandle dbf;
    SHPHandle h = create_layer(dir, "n", SHPT_POLYGON, &dbf);
    ring rings[] = {{cw_0_10, 5}};
    add_shape(h, SHPT_POLYGON, rings, 1);
    add_record(dbf, "a");
    add_shape(h, SHPT_NULL, NULL, 0);
    add_record(dbf, "b");
    add_shape(h, SHPT_POLYGON, rings, 1);
    add_record(dbf, "c");
    SHPClose(h);
    DBFClose(dbf);

    st_diags d;
    st_diags_init(&d);
    st_reader *r = NULL;
    assert_int_equal(open_layer(dir, "n.shp", &d, &r), ST_OK);
    st_feature *f = next_feature(r);
    assert_int_equal(f->geom.type, ST_GEOM_POLYGON);
    st_feature_free(f);
    f = next_feature(r);
    assert_int_equal(f->geom.type, ST_GEOM_NULL);
    assert_int_equal(f->geom.ncoords, 0);
    assert_string_equal(f->source_id, "2");
    assert_string_equal(st_feature_value(f, 0), "b");
    st_feature_free(f);
    f = next_feature(r);
    assert_string_equal(st_feature_value(f, 0), "c");
    assert_int_equal(f->index, 2);
    st_feature_free(f);
    st_reader_close(r);
    assert_int_equal(d.errors, 0);
    st_diags_free(&d);
    remove_dir(dir);
}

/* A record marked deleted in the DBF is not part of the layer; GDAL's
** ogrinfo skips it the same way when it lists features. */
static void test_read_skips_deleted_records(void **state)
{
    (void)state;
    char dir[64];
    make_dir(dir, sizeof dir);
    DBFHandle dbf;
    SHPHandle h = create_layer(dir, "d", SHPT_POLYGON, &dbf);
    ring rings[] = {{cw_0_10, 5}};
    for (int i = 0; i < 3; i++)
        add_shape(h, SHPT_POLYGON, rings, 1);
    add_record(dbf, "a");
    add_record(dbf, "b");
    add_record(dbf, "c");
    assert_true(DBFMarkRecordDeleted(dbf, 1, 1));
    SHPClose(h);
    DBFClose(dbf);
    st_diags d;
    st_diags_init(&d);
    st_reader *r = NULL;
    assert_int_equal(open_layer(dir, "d.shp", &d, &r), ST_OK);
    st_feature *f = next_feature(r);
    assert_string_equal(f->source_id, "1");
    st_feature_free(f);
    f = next_feature(r);
    assert_string_equal(f->source_id, "3");
    assert_string_equal(st_feature_value(f, 0), "c");
    assert_int_equal(f->index, 1);
    st_feature_free(f);
    assert_int_equal(st_reader_next(r, &f), ST_OK);
    assert_null(f);
    st_reader_close(r);
    st_diags_free(&d);
    remove_dir(dir);
}

/* More parts than ST_SHP_MAX_PARTS (100000) in one shape: ST_ERR_LIMIT
** naming the feature, not a slow hole matching. */
static void test_read_part_limit(void **state)
{
    (void)state;
    char dir[64];
    make_dir(dir, sizeof dir);
    DBFHandle dbf;
    SHPHandle h = create_layer(dir, "p", SHPT_POLYGON, &dbf);
    ring rings[] = {{cw_0_10, 5}};
    add_shape(h, SHPT_POLYGON, rings, 1);
    add_record(dbf, "fine");
    enum { N = 100001 };
    int *starts = malloc(N * sizeof *starts);
    double *x = malloc(N * sizeof *x), *y = malloc(N * sizeof *y);
    assert_non_null(starts);
    assert_non_null(x);
    assert_non_null(y);
    for (int i = 0; i < N; i++) {
        starts[i] = i;
        x[i] = i;
        y[i] = -i;
    }
    SHPObject *o = SHPCreateObject(SHPT_POLYGON, -1, N, starts, NULL, N, x, y, NULL, NULL);
    assert_true(SHPWriteObject(h, -1, o) == 1);
    SHPDestroyObject(o);
    free(starts);
    free(x);
    free(y);
    add_record(dbf, "too many parts");
    SHPClose(h);
    DBFClose(dbf);
    st_diags d;
    st_diags_init(&d);
    st_reader *r = NULL;
    assert_int_equal(open_layer(dir, "p.shp", &d, &r), ST_OK);
    st_feature *f = next_feature(r);
    st_feature_free(f);
    assert_int_equal(st_reader_next(r, &f), ST_ERR_LIMIT);
    assert_null(f);
    assert_int_equal(d.errors, 1);
    assert_int_equal(d.items[0].feature, 1);
    assert_non_null(strstr(d.items[0].message, "record 2: 100001 vertices in 100001 parts"));
    st_reader_close(r);
    st_diags_free(&d);
    remove_dir(dir);
}

/* ---- reader: text encoding and DBF types ------------------------------- */

/* A one-record point layer whose text field (named by the raw bytes
** 'field') holds the raw bytes 'value'; 'ldid' goes to DBFCreateEx
** ("LDID/87"; "LDID/0" says nothing: DBFCreate alone writes 87); 'cpg' is written as the .cpg when not NULL. */
static char *read_encoded(const char *field, const char *value, const char *ldid,
                          const char *cpg, char **name_out)
{
    char dir[64], path[512];
    make_dir(dir, sizeof dir);
    snprintf(path, sizeof path, "%s/e", dir);
    SHPHandle h = SHPCreate(path, SHPT_POINT);
    DBFHandle dbf = DBFCreateEx(path, ldid);
    assert_non_null(h);
    assert_non_null(dbf);
    assert_int_equal(DBFAddField(dbf, field, FTString, 40, 0), 0);
    double x = 1, y = 2;
    SHPObject *o = SHPCreateSimpleObject(SHPT_POINT, 1, &x, &y, NULL);
    assert_true(SHPWriteObject(h, -1, o) == 0);
    SHPDestroyObject(o);
    assert_true(DBFWriteStringAttribute(dbf, 0, 0, value));
    SHPClose(h);
    DBFClose(dbf);
    write_file(dir, "e.prj", prj_wgs84);
    if (cpg)
        write_file(dir, "e.cpg", cpg);

    st_diags d;
    st_diags_init(&d);
    st_reader *r = NULL;
    assert_int_equal(open_layer(dir, "e.shp", &d, &r), ST_OK);
    if (name_out)
        *name_out = strdup(st_reader_fields(r)->items[0].name);
    st_feature *f = next_feature(r);
    assert_int_equal(f->geom.type, ST_GEOM_POINT);
    char *v = strdup(st_feature_value(f, 0));
    st_feature_free(f);
    st_reader_close(r);
    st_diags_free(&d);
    remove_dir(dir);
    return v;
}

static void expect_decoded(const char *value, const char *ldid, const char *cpg,
                           const char *want)
{
    char *got = read_encoded("name", value, ldid, cpg, NULL);
    assert_string_equal(got, want);
    free(got);
}

static void test_read_encodings(void **state)
{
    (void)state;
    char *name = NULL;
    /* .cpg Latin-1: value and field name converted to UTF-8. */
    char *v = read_encoded("h\xF6he", "Z\xFCrich", "LDID/0", "ISO-8859-1\n", &name);
    assert_string_equal(v, "Z\xC3\xBCrich");
    assert_string_equal(name, "h\xC3\xB6he");
    free(v);
    free(name);
    expect_decoded("Z\xFCrich", "LDID/0", "88591", "Z\xC3\xBCrich");
    expect_decoded("Z\xFCrich", "LDID/0", "28591", "Z\xC3\xBCrich");
    /* .cpg code page number 1251: Cyrillic "При". */
    expect_decoded("\xCF\xF0\xE8", "LDID/0", "1251", "\xD0\x9F\xD1\x80\xD0\xB8");
    /* .cpg UTF-8: valid text as is, an invalid byte becomes U+FFFD. */
    expect_decoded("Z\xC3\xBCrich", "LDID/0", "UTF-8", "Z\xC3\xBCrich");
    expect_decoded("a\xFF" "b", "LDID/0", "UTF-8", "a\xEF\xBF\xBD" "b");
    /* No .cpg, LDID 0x57 (ANSI): Windows-1252, 0x80 is the euro sign. */
    expect_decoded("\x80", "LDID/87", NULL, "\xE2\x82\xAC");
    /* LDID says 1252 even for bytes that happen to be valid UTF-8. */
    expect_decoded("\xC3\xBC", "LDID/87", NULL, "\xC3\x83\xC2\xBC");
    /* Nothing says: valid UTF-8 kept, anything else read as Windows-1252. */
    expect_decoded("Z\xC3\xBCrich", "LDID/0", NULL, "Z\xC3\xBCrich");
    expect_decoded("Z\xFCrich \x80", "LDID/0", NULL, "Z\xC3\xBCrich \xE2\x82\xAC");
    /* Windows-1252 leaves 0x81 undefined: never passed through. */
    expect_decoded("a\x81", "LDID/0", NULL, "a\xEF\xBF\xBD");
}

static void test_read_unknown_cpg_warns(void **state)
{
    (void)state;
    char dir[64];
    make_dir(dir, sizeof dir);
    DBFHandle dbf;
    SHPHandle h = create_layer(dir, "u", SHPT_POLYGON, &dbf);
    ring rings[] = {{cw_0_10, 5}};
    add_shape(h, SHPT_POLYGON, rings, 1);
    add_record(dbf, "Z\xFCrich");
    SHPClose(h);
    DBFClose(dbf);
    write_file(dir, "u.cpg", "NO-SUCH-CODEPAGE");
    st_diags d;
    st_diags_init(&d);
    st_reader *r = NULL;
    assert_int_equal(open_layer(dir, "u.shp", &d, &r), ST_OK);
    assert_int_equal(d.warnings, 1);
    assert_non_null(strstr(d.items[0].file, "u.cpg"));
    assert_non_null(strstr(d.items[0].message, "NO-SUCH-CODEPAGE"));
    st_feature *f = next_feature(r);
    assert_string_equal(st_feature_value(f, 0), "Z\xC3\xBCrich");
    st_feature_free(f);
    st_reader_close(r);
    st_diags_free(&d);
    remove_dir(dir);
}

static void test_read_dbf_types(void **state)
{
    (void)state;
    char dir[64], path[512];
    make_dir(dir, sizeof dir);
    snprintf(path, sizeof path, "%s/t", dir);
    SHPHandle h = SHPCreate(path, SHPT_POLYGON);
    DBFHandle dbf = DBFCreate(path);
    assert_int_equal(DBFAddNativeFieldType(dbf, "count", 'N', 10, 0), 0);
    assert_int_equal(DBFAddNativeFieldType(dbf, "ratio", 'N', 12, 3), 1);
    assert_int_equal(DBFAddNativeFieldType(dbf, "real", 'N', 24, 15), 2);
    assert_int_equal(DBFAddNativeFieldType(dbf, "float", 'F', 19, 11), 3);
    assert_int_equal(DBFAddNativeFieldType(dbf, "flag", 'L', 1, 0), 4);
    assert_int_equal(DBFAddNativeFieldType(dbf, "when", 'D', 8, 0), 5);
    assert_int_equal(DBFAddNativeFieldType(dbf, "name", 'C', 10, 0), 6);
    assert_int_equal(DBFAddNativeFieldType(dbf, "name", 'C', 10, 0), 7);   /* again */
    assert_int_equal(DBFAddNativeFieldType(dbf, "", 'C', 10, 0), 8);
    ring rings[] = {{cw_0_10, 5}};
    add_shape(h, SHPT_POLYGON, rings, 1);
    assert_true(DBFWriteIntegerAttribute(dbf, 0, 0, -42));
    assert_true(DBFWriteDoubleAttribute(dbf, 0, 1, 1.5));
    assert_true(DBFWriteDoubleAttribute(dbf, 0, 2, 0.1));
    assert_true(DBFWriteDoubleAttribute(dbf, 0, 3, 1234.5678));
    assert_true(DBFWriteLogicalAttribute(dbf, 0, 4, 'T'));
    char date[] = "20240131";
    assert_true(DBFWriteAttributeDirectly(dbf, 0, 5, date));
    assert_true(DBFWriteStringAttribute(dbf, 0, 6, "  padded "));
    add_shape(h, SHPT_POLYGON, rings, 1);
    for (int j = 0; j < 9; j++)
        assert_true(DBFWriteNULLAttribute(dbf, 1, j));
    SHPClose(h);
    DBFClose(dbf);
    write_file(dir, "t.prj", prj_wgs84);

    st_diags d;
    st_diags_init(&d);
    st_reader *r = NULL;
    assert_int_equal(open_layer(dir, "t.shp", &d, &r), ST_OK);
    const st_fields *fl = st_reader_fields(r);
    static const st_field_type want[] = {ST_FIELD_INTEGER, ST_FIELD_REAL, ST_FIELD_REAL,
                                         ST_FIELD_REAL, ST_FIELD_BOOLEAN, ST_FIELD_TEXT,
                                         ST_FIELD_TEXT};
    assert_int_equal(fl->count, 9);
    for (int j = 0; j < 7; j++)
        assert_int_equal(fl->items[j].type, want[j]);
    /* Field names stay unique and non-empty (values are matched by index). */
    assert_string_equal(fl->items[6].name, "name");
    assert_string_equal(fl->items[7].name, "name_2");
    assert_string_equal(fl->items[8].name, "field_9");
    st_feature *f = next_feature(r);
    assert_string_equal(st_feature_value(f, 0), "-42");
    assert_string_equal(st_feature_value(f, 1), "1.5");
    assert_string_equal(st_feature_value(f, 2), "0.1");   /* from 0.100000000000000 */
    assert_string_equal(st_feature_value(f, 3), "1234.5678");
    assert_string_equal(st_feature_value(f, 4), "true");
    assert_string_equal(st_feature_value(f, 5), "2024-01-31");
    assert_string_equal(st_feature_value(f, 6), "padded");
    st_feature_free(f);
    f = next_feature(r);
    for (uint32_t j = 0; j < 9; j++)
        assert_null(st_feature_value(f, j));
    st_feature_free(f);
    st_reader_close(r);
    st_diags_free(&d);
    remove_dir(dir);
}

/* ---- reader: broken files ---------------------------------------------- */

/* A polygon layer "b" with 'nshapes' shapes and 'nrecords' DBF records. */
static void make_broken_base(const char *dir, int nshapes, int nrecords)
{
    char path[512];
    snprintf(path, sizeof path, "%s/b", dir);
    SHPHandle h = SHPCreate(path, SHPT_POLYGON);
    DBFHandle dbf = DBFCreate(path);
    assert_int_equal(DBFAddField(dbf, "name", FTString, 10, 0), 0);
    ring rings[] = {{cw_0_10, 5}};
    for (int i = 0; i < nshapes; i++)
        add_shape(h, SHPT_POLYGON, rings, 1);
    for (int i = 0; i < nrecords; i++)
        add_record(dbf, "x");
    SHPClose(h);
    DBFClose(dbf);
    write_file(dir, "b.prj", prj_wgs84);
}

/* Opening "b.shp" fails with 'code'; the one error names a file ending in
** 'file_suffix' and its message contains 'words'. */
static void expect_open_error(const char *dir, st_status code, const char *file_suffix,
                              const char *words)
{
    st_diags d;
    st_diags_init(&d);
    st_reader *r = NULL;
    assert_int_equal(open_layer(dir, "b.shp", &d, &r), code);
    assert_null(r);
    assert_int_equal(d.errors, 1);
    const char *file = d.items[0].file;
    assert_non_null(file);
    assert_string_equal(file + strlen(file) - strlen(file_suffix), file_suffix);
    if (!strstr(d.items[0].message, words))
        fail_msg("message '%s' lacks '%s'", d.items[0].message, words);
    st_diags_free(&d);
}

static void truncate_file(const char *dir, const char *name, long cut)
{
    char path[512];
    struct stat st;
    snprintf(path, sizeof path, "%s/%s", dir, name);
    assert_int_equal(stat(path, &st), 0);
    assert_int_equal(truncate(path, st.st_size - cut), 0);
}

static void test_read_broken_files(void **state)
{
    (void)state;
    char dir[64], path[512];
    make_dir(dir, sizeof dir);

    make_broken_base(dir, 2, 2);
    snprintf(path, sizeof path, "%s/b.dbf", dir);
    remove(path);
    expect_open_error(dir, ST_ERR_FORMAT, "b.shp", "b.dbf is missing");

    make_broken_base(dir, 2, 2);
    snprintf(path, sizeof path, "%s/b.shx", dir);
    remove(path);
    expect_open_error(dir, ST_ERR_FORMAT, "b.shp", "b.shx is missing");

    make_broken_base(dir, 2, 2);
    truncate_file(dir, "b.shp", 10);
    expect_open_error(dir, ST_ERR_FORMAT, "b.shp", "truncated");

    make_broken_base(dir, 2, 2);
    truncate_file(dir, "b.shx", 4);
    expect_open_error(dir, ST_ERR_FORMAT, "b.shx", "truncated");

    make_broken_base(dir, 2, 2);
    truncate_file(dir, "b.dbf", 5);
    expect_open_error(dir, ST_ERR_FORMAT, "b.dbf", "truncated");

    make_broken_base(dir, 2, 1);
    expect_open_error(dir, ST_ERR_FORMAT, "b.dbf", "has 1 records but b.shp has 2");

    make_broken_base(dir, 1, 2);
    expect_open_error(dir, ST_ERR_FORMAT, "b.dbf", "has 2 records but b.shp has 1");

    make_broken_base(dir, 2, 2);
    write_file(dir, "b.shp", "not a shapefile");
    expect_open_error(dir, ST_ERR_FORMAT, "b.shp", "truncated");
    remove_dir(dir);
}

static void test_read_multipatch_refused(void **state)
{
    (void)state;
    char dir[64], path[512];
    make_dir(dir, sizeof dir);
    snprintf(path, sizeof path, "%s/b", dir);
    SHPHandle h = SHPCreate(path, SHPT_MULTIPATCH);
    DBFHandle dbf = DBFCreate(path);
    assert_int_equal(DBFAddField(dbf, "name", FTString, 10, 0), 0);
    int start = 0, type = SHPP_TRISTRIP;
    double x[] = {0, 1, 0}, y[] = {0, 0, 1}, z[] = {0, 0, 0};
    SHPObject *o = SHPCreateObject(SHPT_MULTIPATCH, -1, 1, &start, &type, 3, x, y, z, NULL);
    assert_true(SHPWriteObject(h, -1, o) == 0);
    SHPDestroyObject(o);
    add_record(dbf, "x");
    SHPClose(h);
    DBFClose(dbf);
    write_file(dir, "b.prj", prj_wgs84);
    expect_open_error(dir, ST_ERR_FORMAT, "b.shp", "MultiPatch");
    remove_dir(dir);
}

static void test_read_without_prj_needs_crs(void **state)
{
    (void)state;
    char dir[64], path[512];
    make_dir(dir, sizeof dir);
    make_broken_base(dir, 1, 1);
    snprintf(path, sizeof path, "%s/b.prj", dir);
    remove(path);
    expect_open_error(dir, ST_ERR_PROJ, "b.shp", "--crs");
    remove_dir(dir);
}

/* ---- writer ------------------------------------------------------------ */

/* A GeoJSON-style polygon (counter-clockwise shell, clockwise hole). */
static void build_polygon(st_geom *g, const double *const *rings, const int *n, int nrings,
                          int new_part_each)
{
    for (int k = 0; k < nrings; k++) {
        if (k == 0 || new_part_each)
            assert_int_equal(st_geom_begin_part(g), ST_OK);
        assert_int_equal(st_geom_begin_ring(g), ST_OK);
        for (int i = 0; i < n[k]; i++)
            assert_int_equal(st_geom_add_xy(g, rings[k][2 * i], rings[k][2 * i + 1]), ST_OK);
    }
}

static st_feature *make_feature(st_geom_type type)
{
    st_feature *f = st_feature_new();
    assert_non_null(f);
    f->geom.type = type;
    return f;
}

static void set_values(st_feature *f, const char *const *values, uint32_t n)
{
    for (uint32_t i = 0; i < n; i++)
        assert_int_equal(st_feature_set_value(f, i, values[i],
                                              values[i] ? strlen(values[i]) : 0), ST_OK);
}

static double object_ring_area(const SHPObject *o, int part)
{
    int a = o->panPartStart[part];
    int b = part + 1 < o->nParts ? o->panPartStart[part + 1] : o->nVertices;
    double s = 0;
    for (int i = a; i + 1 < b; i++)
        s += o->padfX[i] * o->padfY[i + 1] - o->padfX[i + 1] * o->padfY[i];
    return s / 2;
}

static char *slurp(const char *dir, const char *name)
{
    char path[512];
    snprintf(path, sizeof path, "%s/%s", dir, name);
    FILE *fp = fopen(path, "rb");
    assert_non_null(fp);
    static char buf[1024];
    size_t n = fread(buf, 1, sizeof buf - 1, fp);
    fclose(fp);
    buf[n] = '\0';
    return buf;
}

static void test_write_orients_rings(void **state)
{
    (void)state;
    char dir[64], path[512];
    make_dir(dir, sizeof dir);
    snprintf(path, sizeof path, "%s/out.shp", dir);
    st_diags d;
    st_diags_init(&d);
    st_writer *w = NULL;
    assert_int_equal(st_writer_open(path, &d, &w), ST_OK);
    st_fields fl;
    st_fields_init(&fl);
    assert_int_equal(st_fields_add(&fl, "name", ST_FIELD_TEXT, 0, 0, NULL), ST_OK);
    assert_int_equal(st_writer_begin_layer(w, "out", &fl, ST_GEOM_MULTIPOLYGON), ST_OK);

    static const double ccw_shell[] = {0, 0, 10, 0, 10, 10, 0, 10, 0, 0};
    static const double cw_hole[] = {2, 2, 2, 4, 4, 4, 4, 2, 2, 2};
    const double *const poly[] = {ccw_shell, cw_hole};
    const int n2[] = {5, 5};
    st_feature *f = make_feature(ST_GEOM_POLYGON);
    build_polygon(&f->geom, poly, n2, 2, 0);
    const char *v1[] = {"with hole"};
    set_values(f, v1, 1);
    assert_int_equal(st_writer_write(w, f), ST_OK);
    st_feature_free(f);

    const double *const multi[] = {ccw_shell, cw_200_210};
    f = make_feature(ST_GEOM_MULTIPOLYGON);
    build_polygon(&f->geom, multi, n2, 2, 1);
    assert_int_equal(st_writer_write(w, f), ST_OK);
    st_feature_free(f);
    f = make_feature(ST_GEOM_NULL);
    assert_int_equal(st_writer_write(w, f), ST_OK);
    st_feature_free(f);
    assert_int_equal(st_writer_commit(w), ST_OK);
    st_writer_close(w);
    st_fields_free(&fl);

    /* Five files and no temporaries. */
    assert_int_equal(count_entries(dir), 5);
    assert_true(file_exists(dir, "out.shx") && file_exists(dir, "out.dbf"));
    assert_string_equal(slurp(dir, "out.cpg"), "UTF-8");
    assert_non_null(strstr(slurp(dir, "out.prj"), "GEOGCS[\"GCS_WGS_1984\""));

    /* Read back with Shapelib itself: shells clockwise, holes not. */
    SHPHandle h = SHPOpen(path, "rb");
    assert_non_null(h);
    int count, type;
    SHPGetInfo(h, &count, &type, NULL, NULL);
    assert_int_equal(count, 3);
    assert_int_equal(type, SHPT_POLYGON);
    SHPObject *o = SHPReadObject(h, 0);
    assert_int_equal(o->nParts, 2);
    assert_true(object_ring_area(o, 0) == -100.0);
    assert_true(object_ring_area(o, 1) == 4.0);
    SHPDestroyObject(o);
    o = SHPReadObject(h, 1);
    assert_int_equal(o->nParts, 2);
    assert_true(object_ring_area(o, 0) == -100.0);
    assert_true(object_ring_area(o, 1) == -100.0);
    SHPDestroyObject(o);
    o = SHPReadObject(h, 2);
    assert_int_equal(o->nSHPType, SHPT_NULL);
    SHPDestroyObject(o);
    SHPClose(h);

    /* And with our reader: the same structure comes back. */
    st_reader *r = NULL;
    assert_int_equal(open_layer(dir, "out.shp", &d, &r), ST_OK);
    f = next_feature(r);
    assert_int_equal(f->geom.type, ST_GEOM_POLYGON);
    assert_int_equal(f->geom.nrings, 2);
    assert_string_equal(st_feature_value(f, 0), "with hole");
    st_feature_free(f);
    f = next_feature(r);
    assert_int_equal(f->geom.type, ST_GEOM_MULTIPOLYGON);
    assert_int_equal(f->geom.nparts, 2);
    st_feature_free(f);
    f = next_feature(r);
    assert_int_equal(f->geom.type, ST_GEOM_NULL);
    st_feature_free(f);
    st_reader_close(r);
    assert_int_equal(d.errors, 0);
    st_diags_free(&d);
    remove_dir(dir);
}

static void test_write_shortens_field_names(void **state)
{
    (void)state;
    char dir[64], path[512];
    make_dir(dir, sizeof dir);
    snprintf(path, sizeof path, "%s/long.shp", dir);
    static const char *const names[] = {
        "building_height", "building_heights", "name", "Name",
        "h\xC3\xB6he_\xC3\xBC" "ber_grund", "building_h"};
    static const char *const shorts[] = {
        "building~1", "building~2", "name", "Name~1", "h\xC3\xB6he_\xC3\xBC" "be",
        "building_h"};
    st_fields fl;
    st_fields_init(&fl);
    for (int i = 0; i < 6; i++)
        assert_int_equal(st_fields_add(&fl, names[i], i == 0 ? ST_FIELD_REAL : ST_FIELD_TEXT,
                                       0, 0, NULL), ST_OK);
    st_diags d;
    st_diags_init(&d);
    st_writer *w = NULL;
    assert_int_equal(st_writer_open(path, &d, &w), ST_OK);
    assert_int_equal(st_writer_begin_layer(w, "long", &fl, ST_GEOM_POLYGON), ST_OK);
    st_feature *f = make_feature(ST_GEOM_POLYGON);
    const double *const poly[] = {cw_0_10};
    const int n1[] = {5};
    build_polygon(&f->geom, poly, n1, 1, 0);
    const char *vals[] = {"9", "a", "b", "c", "d", "e"};
    set_values(f, vals, 6);
    assert_int_equal(st_writer_write(w, f), ST_OK);
    st_feature_free(f);
    assert_int_equal(st_writer_commit(w), ST_OK);
    /* Each change is reported as "long -> short"; names that fit are not. */
    const char *notes = st_writer_notes(w);
    assert_non_null(notes);
    char line[128];
    int changed = 0;
    for (int i = 0; i < 6; i++) {
        snprintf(line, sizeof line, "%s -> %s\n", names[i], shorts[i]);
        if (strcmp(names[i], shorts[i]) != 0) {
            changed++;
            if (!strstr(notes, line))
                fail_msg("notes lack '%s': %s", line, notes);
        } else {
            assert_null(strstr(notes, line));
        }
    }
    int lines = 0;
    for (const char *p = notes; *p; p++)
        lines += *p == '\n';
    assert_int_equal(lines, changed);
    st_writer_close(w);

    /* Shapelib sees the short names: at most 10 bytes, unique without case. */
    DBFHandle dbf = DBFOpen(path, "rb");
    assert_non_null(dbf);
    assert_int_equal(DBFGetFieldCount(dbf), 6);
    char got[6][XBASE_FLDNAME_LEN_READ + 1];
    for (int i = 0; i < 6; i++) {
        DBFGetFieldInfo(dbf, i, got[i], NULL, NULL);
        assert_string_equal(got[i], shorts[i]);
        assert_true(strlen(got[i]) <= 10);
        assert_int_equal(st_utf8_valid_prefix(got[i], strlen(got[i])), strlen(got[i]));
        for (int k = 0; k < i; k++)
            assert_true(strcasecmp(got[i], got[k]) != 0);
    }
    assert_string_equal(DBFReadStringAttribute(dbf, 0, 0), "9");
    DBFClose(dbf);
    st_fields_free(&fl);
    st_diags_free(&d);
    remove_dir(dir);
}

static void test_write_values_round_trip(void **state)
{
    (void)state;
    char dir[64], path[512];
    make_dir(dir, sizeof dir);
    snprintf(path, sizeof path, "%s/v.shp", dir);
    st_fields fl;
    st_fields_init(&fl);
    assert_int_equal(st_fields_add(&fl, "text", ST_FIELD_TEXT, 0, 0, NULL), ST_OK);
    assert_int_equal(st_fields_add(&fl, "short", ST_FIELD_TEXT, 5, 0, NULL), ST_OK);
    assert_int_equal(st_fields_add(&fl, "int", ST_FIELD_INTEGER, 0, 0, NULL), ST_OK);
    assert_int_equal(st_fields_add(&fl, "real", ST_FIELD_REAL, 0, 0, NULL), ST_OK);
    assert_int_equal(st_fields_add(&fl, "flag", ST_FIELD_BOOLEAN, 0, 0, NULL), ST_OK);
    assert_int_equal(st_fields_add(&fl, "json", ST_FIELD_JSON, 0, 0, NULL), ST_OK);
    static const char *const rows[][6] = {
        {"Z\xC3\xBCrich", "abcd\xC3\xA9" "fg", "42", "0.1", "true", "{\"a\":1}"},
        {NULL, "ok", "-7", "0.3333333333333333", "false", NULL},
        {"x", NULL, "123456789012345678", "1e-07", NULL, "[]"},
        {"y", "z", "3.5", "1e300", "maybe", NULL},
    };
    st_diags d;
    st_diags_init(&d);
    st_writer *w = NULL;
    assert_int_equal(st_writer_open(path, &d, &w), ST_OK);
    assert_int_equal(st_writer_begin_layer(w, "v", &fl, ST_GEOM_POINT), ST_OK);
    for (int i = 0; i < 4; i++) {
        st_feature *f = make_feature(ST_GEOM_POINT);
        assert_int_equal(st_geom_add_xy(&f->geom, i, -i), ST_OK);
        set_values(f, rows[i], 6);
        assert_int_equal(st_writer_write(w, f), ST_OK);
        st_feature_free(f);
    }
    assert_int_equal(st_writer_commit(w), ST_OK);
    const char *notes = st_writer_notes(w);
    assert_non_null(strstr(notes, "field short: 1 text values cut to 5 bytes\n"));
    assert_non_null(strstr(notes, "field int: 1 values that are not integers"));
    assert_non_null(strstr(notes, "field flag: 1 values that are not true/false"));
    st_writer_close(w);

    st_reader *r = NULL;
    assert_int_equal(open_layer(dir, "v.shp", &d, &r), ST_OK);
    const st_fields *rf = st_reader_fields(r);
    assert_int_equal(rf->items[0].type, ST_FIELD_TEXT);
    assert_int_equal(rf->items[1].width, 5);
    assert_int_equal(rf->items[2].type, ST_FIELD_INTEGER);
    assert_int_equal(rf->items[3].type, ST_FIELD_REAL);
    assert_int_equal(rf->items[4].type, ST_FIELD_BOOLEAN);
    assert_int_equal(rf->items[5].type, ST_FIELD_TEXT);
    for (int i = 0; i < 4; i++) {
        st_feature *f = next_feature(r);
        assert_int_equal(f->geom.type, ST_GEOM_POINT);
        assert_true(f->geom.xy[0] == i && f->geom.xy[1] == -i);
        for (uint32_t j = 0; j < 6; j++) {
            const char *want = rows[i][j], *got = st_feature_value(f, j);
            if (i == 0 && j == 1)
                want = "abcd";                     /* cut before the 2-byte é */
            if (i == 3 && (j == 2 || j == 4))
                want = NULL;                       /* not of the field's type */
            if (!want) {
                assert_null(got);
            } else if (j == 3) {
                assert_non_null(got);
                assert_true(strtod(got, NULL) == strtod(want, NULL));
            } else {
                assert_non_null(got);
                assert_string_equal(got, want);
            }
        }
        st_feature_free(f);
    }
    st_reader_close(r);
    st_fields_free(&fl);
    st_diags_free(&d);
    remove_dir(dir);
}

static void test_write_close_without_commit_leaves_nothing(void **state)
{
    (void)state;
    char dir[64], path[512];
    make_dir(dir, sizeof dir);
    snprintf(path, sizeof path, "%s/gone.shp", dir);
    st_fields fl;
    st_fields_init(&fl);
    st_diags d;
    st_diags_init(&d);

    st_writer *w = NULL;
    assert_int_equal(st_writer_open(path, &d, &w), ST_OK);
    assert_int_equal(st_writer_begin_layer(w, "gone", &fl, ST_GEOM_POLYGON), ST_OK);
    assert_true(count_entries(dir) >= 5);          /* the temporaries exist */
    st_feature *f = make_feature(ST_GEOM_POLYGON);
    const double *const poly[] = {cw_0_10};
    const int n1[] = {5};
    build_polygon(&f->geom, poly, n1, 1, 0);
    assert_int_equal(st_writer_write(w, f), ST_OK);
    st_feature_free(f);
    st_writer_close(w);
    assert_int_equal(count_entries(dir), 0);

    /* A refused feature (a point in a polygon layer), then close. */
    assert_int_equal(st_writer_open(path, &d, &w), ST_OK);
    assert_int_equal(st_writer_begin_layer(w, "gone", &fl, ST_GEOM_POLYGON), ST_OK);
    f = make_feature(ST_GEOM_POINT);
    assert_int_equal(st_geom_add_xy(&f->geom, 1, 2), ST_OK);
    assert_int_equal(st_writer_write(w, f), ST_ERR_USAGE);
    st_feature_free(f);
    st_writer_close(w);
    assert_int_equal(count_entries(dir), 0);
    assert_non_null(strstr(d.items[d.count - 1].message, "POINT"));

    /* A commit without a layer fails and leaves nothing either. */
    assert_int_equal(st_writer_open(path, &d, &w), ST_OK);
    assert_int_equal(st_writer_commit(w), ST_ERR_USAGE);
    st_writer_close(w);
    assert_int_equal(count_entries(dir), 0);

    /* With no attributes a record-number field is added (dBASE needs one). */
    assert_int_equal(st_writer_open(path, &d, &w), ST_OK);
    assert_int_equal(st_writer_begin_layer(w, "gone", &fl, ST_GEOM_POLYGON), ST_OK);
    f = make_feature(ST_GEOM_NULL);
    assert_int_equal(st_writer_write(w, f), ST_OK);
    st_feature_free(f);
    assert_int_equal(st_writer_commit(w), ST_OK);
    assert_non_null(strstr(st_writer_notes(w), "-> record"));
    st_writer_close(w);
    assert_int_equal(count_entries(dir), 5);
    DBFHandle dbf = DBFOpen(path, "rb");
    assert_int_equal(DBFGetRecordCount(dbf), 1);
    assert_int_equal(DBFReadIntegerAttribute(dbf, 0, 0), 1);
    DBFClose(dbf);

    st_fields_free(&fl);
    st_diags_free(&d);
    remove_dir(dir);
}

/* ---- real extracts, against GDAL ---------------------------------------- */

static int real_path(const char *rel, char *out, size_t n)
{
    const char *base = getenv("ST_REAL_DATA");
    snprintf(out, n, "%s/%s", base && *base ? base : "../shared/data/real", rel);
    struct stat st;
    return stat(out, &st) == 0;
}

/* Feature count as GDAL's `ogrinfo -ro -so -al` reports it, or -1. */
static long ogr_feature_count(const char *path)
{
    char cmd[1200], line[512];
    snprintf(cmd, sizeof cmd, "ogrinfo -ro -so -al '%s' 2>/dev/null", path);
    FILE *p = popen(cmd, "r");
    if (!p)
        return -1;
    long n = -1;
    while (fgets(line, sizeof line, p))
        if (strncmp(line, "Feature Count: ", 15) == 0)
            n = strtol(line + 15, NULL, 10);
    pclose(p);
    return n;
}

static long read_all(const char *path, st_reader **out)
{
    st_diags d;
    st_diags_init(&d);
    st_read_options o = ST_READ_OPTIONS_DEFAULT;
    o.keep_source_crs = 1;
    st_reader *r = NULL;
    assert_int_equal(st_reader_open(path, &o, &d, &r), ST_OK);
    long n = 0;
    st_feature *f;
    while (st_reader_next(r, &f) == ST_OK && f) {
        assert_true(f->geom.type == ST_GEOM_POLYGON || f->geom.type == ST_GEOM_MULTIPOLYGON);
        n++;
        st_feature_free(f);
    }
    assert_int_equal(d.errors, 0);
    st_diags_free(&d);
    if (out)
        *out = r;
    else
        st_reader_close(r);
    return n;
}

static void test_real_counts_match_gdal(void **state)
{
    (void)state;
    static const char *const sets[] = {"belem/buildings.shp",
                                       "north_macedonia/buildings.shp"};
    for (int i = 0; i < 2; i++) {
        char path[1024];
        if (!real_path(sets[i], path, sizeof path))
            skip();
        long want = ogr_feature_count(path);
        if (want < 0)
            skip();   /* no ogrinfo on this machine */
        long got = read_all(path, NULL);
        if (got != want)
            fail_msg("%s: read %ld features, GDAL ogrinfo reports %ld", path, got, want);
    }
}

/* Belém read, written by our writer, read again: the same features, and
** GDAL counts the same number in the written file. */
static void test_real_round_trip(void **state)
{
    (void)state;
    char src[1024], dir[64], out[512];
    if (!real_path("belem/buildings.shp", src, sizeof src))
        skip();
    make_dir(dir, sizeof dir);
    snprintf(out, sizeof out, "%s/belem.shp", dir);
    st_diags d;
    st_diags_init(&d);
    st_read_options o = ST_READ_OPTIONS_DEFAULT;
    o.keep_source_crs = 1;
    st_reader *r = NULL;
    st_writer *w = NULL;
    assert_int_equal(st_reader_open(src, &o, &d, &r), ST_OK);
    assert_int_equal(st_writer_open(out, &d, &w), ST_OK);
    assert_int_equal(st_writer_begin_layer(w, "belem", st_reader_fields(r),
                                           ST_GEOM_MULTIPOLYGON), ST_OK);
    st_feature *f;
    while (st_reader_next(r, &f) == ST_OK && f) {
        assert_int_equal(st_writer_write(w, f), ST_OK);
        st_feature_free(f);
    }
    assert_int_equal(st_writer_commit(w), ST_OK);
    st_writer_close(w);
    st_reader_close(r);

    st_reader *a = NULL, *b = NULL;
    assert_int_equal(st_reader_open(src, &o, &d, &a), ST_OK);
    assert_int_equal(st_reader_open(out, &o, &d, &b), ST_OK);
    const st_fields *fa = st_reader_fields(a), *fb = st_reader_fields(b);
    assert_int_equal(fa->count, fb->count);
    for (uint32_t j = 0; j < fa->count; j++) {
        assert_string_equal(fa->items[j].name, fb->items[j].name);
        assert_int_equal(fa->items[j].type, fb->items[j].type);
    }
    long n = 0;
    st_feature *x, *y;
    while (st_reader_next(a, &x) == ST_OK && x) {
        assert_int_equal(st_reader_next(b, &y), ST_OK);
        assert_non_null(y);
        st_geom_orient(&x->geom, 0);   /* the writer's orientation */
        assert_int_equal(x->geom.type, y->geom.type);
        assert_int_equal(x->geom.nrings, y->geom.nrings);
        assert_int_equal(x->geom.ncoords, y->geom.ncoords);
        assert_memory_equal(x->geom.xy, y->geom.xy, 2 * sizeof(double) * x->geom.ncoords);
        for (uint32_t j = 0; j < fa->count; j++) {
            const char *va = st_feature_value(x, j), *vb = st_feature_value(y, j);
            if (!va)
                assert_null(vb);
            else
                assert_string_equal(va, vb);
        }
        n++;
        st_feature_free(x);
        st_feature_free(y);
    }
    assert_int_equal(st_reader_next(b, &y), ST_OK);
    assert_null(y);
    st_reader_close(a);
    st_reader_close(b);
    assert_int_equal(d.errors, 0);
    st_diags_free(&d);
    long gdal = ogr_feature_count(out);
    if (gdal >= 0)
        assert_int_equal(gdal, n);
    remove_dir(dir);
}

/* 1 if s holds a Cyrillic letter (U+0400..U+04FF: lead bytes D0..D3). */
static int has_cyrillic(const char *s)
{
    for (; *s; s++)
        if ((unsigned char)s[0] >= 0xD0 && (unsigned char)s[0] <= 0xD3 &&
            ((unsigned char)s[1] & 0xC0) == 0x80)
            return 1;
    return 0;
}

/* Every 'name' of north_macedonia equals GDAL's reading of it, is valid
** UTF-8, and the Cyrillic ones are there. */
static void test_real_cyrillic_names_are_utf8(void **state)
{
    (void)state;
    char path[1024], cmd[1200], line[4096];
    if (!real_path("north_macedonia/buildings.shp", path, sizeof path))
        skip();
    snprintf(cmd, sizeof cmd, "ogrinfo -ro -al -q -geom=NO '%s' 2>/dev/null", path);
    FILE *p = popen(cmd, "r");
    if (!p)
        skip();
    st_diags d;
    st_diags_init(&d);
    st_read_options o = ST_READ_OPTIONS_DEFAULT;
    o.keep_source_crs = 1;
    st_reader *r = NULL;
    assert_int_equal(st_reader_open(path, &o, &d, &r), ST_OK);
    int32_t name = st_fields_find(st_reader_fields(r), "name");
    assert_true(name >= 0);
    static const char prefix[] = "  name (String) = ";
    long compared = 0, cyrillic = 0;
    while (fgets(line, sizeof line, p)) {
        if (strncmp(line, prefix, strlen(prefix)) != 0)
            continue;
        char *gdal = line + strlen(prefix);
        gdal[strcspn(gdal, "\n")] = '\0';
        st_feature *f = NULL;
        assert_int_equal(st_reader_next(r, &f), ST_OK);
        assert_non_null(f);
        const char *ours = st_feature_value(f, (uint32_t)name);
        const char *want = strcmp(gdal, "(null)") == 0 ? NULL : gdal;
        if (want) {
            assert_non_null(ours);
            assert_string_equal(ours, want);
            assert_int_equal(st_utf8_valid_prefix(ours, strlen(ours)), strlen(ours));
            cyrillic += has_cyrillic(ours);
        } else {
            assert_null(ours);
        }
        compared++;
        st_feature_free(f);
    }
    pclose(p);
    if (compared == 0)
        skip();   /* no ogrinfo */
    assert_int_equal(compared, st_reader_count_hint(r));
    assert_true(cyrillic > 0);
    st_reader_close(r);
    st_diags_free(&d);
}

/* ---- allocation failures ----------------------------------------------- */

/* A small layer that takes every reader path: a polygon with a hole, a
** null shape, a multipolygon; text (Latin-1 by .cpg), integer, real,
** boolean and date fields. */
static void make_rich_fixture(const char *dir)
{
    char path[512];
    snprintf(path, sizeof path, "%s/rich", dir);
    SHPHandle h = SHPCreate(path, SHPT_POLYGON);
    DBFHandle dbf = DBFCreate(path);
    assert_int_equal(DBFAddField(dbf, "name", FTString, 20, 0), 0);
    assert_int_equal(DBFAddNativeFieldType(dbf, "levels", 'N', 10, 0), 1);
    assert_int_equal(DBFAddNativeFieldType(dbf, "height", 'N', 24, 15), 2);
    assert_int_equal(DBFAddNativeFieldType(dbf, "flag", 'L', 1, 0), 3);
    assert_int_equal(DBFAddNativeFieldType(dbf, "when", 'D', 8, 0), 4);
    ring hole[] = {{ccw_2_4, 5}, {cw_0_10, 5}};
    ring multi[] = {{cw_0_10, 5}, {cw_200_210, 5}, {ccw_20_30, 5}};
    add_shape(h, SHPT_POLYGON, hole, 2);
    add_shape(h, SHPT_NULL, NULL, 0);
    add_shape(h, SHPT_POLYGON, multi, 3);
    for (int i = 0; i < 3; i++) {
        assert_true(DBFWriteStringAttribute(dbf, i, 0, "Z\xFCrich"));
        assert_true(DBFWriteIntegerAttribute(dbf, i, 1, i + 1));
        assert_true(DBFWriteDoubleAttribute(dbf, i, 2, 3.25 * i));
        assert_true(DBFWriteLogicalAttribute(dbf, i, 3, 'F'));
        char date[] = "19991231";
        assert_true(DBFWriteAttributeDirectly(dbf, i, 4, date));
    }
    SHPClose(h);
    DBFClose(dbf);
    write_file(dir, "rich.prj", prj_wgs84);
    write_file(dir, "rich.cpg", "ISO-8859-1");
}

static st_status open_and_read_all(const char *path, long *features)
{
    st_diags d;
    st_diags_init(&d);
    st_read_options o = ST_READ_OPTIONS_DEFAULT;
    o.keep_source_crs = 1;
    st_reader *r = NULL;
    st_status rc = st_reader_open(path, &o, &d, &r);
    *features = 0;
    st_feature *f = NULL;
    while (rc == ST_OK && (rc = st_reader_next(r, &f)) == ST_OK && f) {
        (*features)++;
        st_feature_free(f);
    }
    st_reader_close(r);
    st_diags_free(&d);
    return rc;
}

static void test_read_nomem_loop(void **state)
{
    (void)state;
    char dir[64], path[512];
    make_dir(dir, sizeof dir);
    make_rich_fixture(dir);
    snprintf(path, sizeof path, "%s/rich.shp", dir);
    long features = 0;
    assert_int_equal(open_and_read_all(path, &features), ST_OK);
    assert_int_equal(features, 3);
    long n;
    for (n = 1; n < 10000; n++) {
        st_alloc_fail_after(n);
        st_status rc = open_and_read_all(path, &features);
        long used = st_alloc_count();
        st_alloc_fail_after(0);
        if (rc == ST_OK) {
            /* The generic reader may recover from a failed allocation (it
            ** falls back to the CRS text as its name); the result must
            ** still be whole. */
            assert_int_equal(features, 3);
            if (used < n)
                break;
            continue;
        }
        if (rc != ST_ERR_NOMEM)
            fail_msg("allocation %ld failed: status %s, expected nomem", n,
                     st_status_name(rc));
    }
    assert_true(n > 20 && n < 10000);
    remove_dir(dir);
}

static st_status write_small_layer(const char *path)
{
    st_diags d;
    st_diags_init(&d);
    st_fields fl;
    st_fields_init(&fl);
    st_writer *w = NULL;
    st_status rc = st_fields_add(&fl, "a_rather_long_name", ST_FIELD_TEXT, 3, 0, NULL);
    if (rc == ST_OK)
        rc = st_fields_add(&fl, "a_rather_long_name_too", ST_FIELD_REAL, 0, 0, NULL);
    if (rc == ST_OK)
        rc = st_writer_open(path, &d, &w);
    if (rc == ST_OK)
        rc = st_writer_begin_layer(w, "small", &fl, ST_GEOM_POLYGON);
    for (int i = 0; i < 3 && rc == ST_OK; i++) {
        st_feature *f = st_feature_new();
        if (!f) {
            rc = ST_ERR_NOMEM;
            break;
        }
        f->geom.type = ST_GEOM_POLYGON;
        for (int k = 0; k < 5 && rc == ST_OK; k++)
            rc = st_geom_add_xy(&f->geom, cw_0_10[2 * k], cw_0_10[2 * k + 1]);
        if (rc == ST_OK)
            rc = st_feature_set_value(f, 0, "long text", 9);
        if (rc == ST_OK)
            rc = st_feature_set_value(f, 1, "2.5", 3);
        if (rc == ST_OK)
            rc = st_writer_write(w, f);
        st_feature_free(f);
    }
    if (rc == ST_OK)
        rc = st_writer_commit(w);
    st_writer_close(w);
    st_fields_free(&fl);
    st_diags_free(&d);
    return rc;
}

static void test_write_nomem_loop(void **state)
{
    (void)state;
    char dir[64], path[512];
    make_dir(dir, sizeof dir);
    snprintf(path, sizeof path, "%s/small.shp", dir);
    long n;
    for (n = 1; n < 10000; n++) {
        st_alloc_fail_after(n);
        st_status rc = write_small_layer(path);
        long used = st_alloc_count();
        st_alloc_fail_after(0);
        if (rc == ST_OK) {
            if (used >= n)
                fail_msg("allocation %ld failed but writing succeeded", n);
            assert_int_equal(count_entries(dir), 5);
            break;
        }
        if (rc != ST_ERR_NOMEM)
            fail_msg("allocation %ld failed: status %s, expected nomem", n,
                     st_status_name(rc));
        assert_int_equal(count_entries(dir), 0);   /* nothing half-written */
    }
    assert_true(n > 10 && n < 10000);
    remove_dir(dir);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_read_polygon_with_hole),
        cmocka_unit_test(test_read_multipolygon_smallest_shell),
        cmocka_unit_test(test_read_hole_without_shell_is_kept),
        cmocka_unit_test(test_read_polygon_z_and_m),
        cmocka_unit_test(test_read_null_shape_is_carried),
        cmocka_unit_test(test_read_skips_deleted_records),
        cmocka_unit_test(test_read_part_limit),
        cmocka_unit_test(test_read_encodings),
        cmocka_unit_test(test_read_unknown_cpg_warns),
        cmocka_unit_test(test_read_dbf_types),
        cmocka_unit_test(test_read_broken_files),
        cmocka_unit_test(test_read_multipatch_refused),
        cmocka_unit_test(test_read_without_prj_needs_crs),
        cmocka_unit_test(test_write_orients_rings),
        cmocka_unit_test(test_write_shortens_field_names),
        cmocka_unit_test(test_write_values_round_trip),
        cmocka_unit_test(test_write_close_without_commit_leaves_nothing),
        cmocka_unit_test(test_real_counts_match_gdal),
        cmocka_unit_test(test_real_cyrillic_names_are_utf8),
        cmocka_unit_test(test_real_round_trip),
        cmocka_unit_test(test_read_nomem_loop),
        cmocka_unit_test(test_write_nomem_loop),
    };
    return cmocka_run_group_tests_name("shp", tests, NULL, NULL);
}
