/*
** tests/unit/test_geojson.c -- GeoJSON and GeoJSONL reading and writing.
**
** Fixtures: tests/data/geojson/ (hand-written; $ST_TEST_DATA overrides
** "tests/data"), files generated here in a temporary folder, and the real
** OSM extracts in ../shared/data/real ($ST_REAL_DATA overrides), whose
** feature counts are checked against GDAL's ogrinfo (the reference).
*/
#include <math.h>
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>
#include <cmocka.h>

#include "stocktake/core.h"
#include "stocktake/feature.h"
#include "stocktake/io.h"
#include "scratch.h"

/* ---- helpers ------------------------------------------------------------- */

static char tmpdir[256];

static const char *data_path(const char *name)
{
    static char buf[1024];
    const char *root = getenv("ST_TEST_DATA");
    snprintf(buf, sizeof buf, "%s/geojson/%s", root ? root : "tests/data", name);
    return buf;
}

static const char *real_path(const char *name)
{
    static char buf[1024];
    const char *root = getenv("ST_REAL_DATA");
    snprintf(buf, sizeof buf, "%s/%s", root ? root : "../shared/data/real", name);
    return buf;
}

static const char *tmp_path(const char *name)
{
    static char buf[1024];
    snprintf(buf, sizeof buf, "%s/%s", tmpdir, name);
    return buf;
}

static void write_file(const char *path, const char *text, size_t n)
{
    FILE *fp = fopen(path, "wb");
    assert_non_null(fp);
    assert_int_equal(fwrite(text, 1, n, fp), n);
    assert_int_equal(fclose(fp), 0);
}

static char *slurp(const char *path, size_t *n)
{
    FILE *fp = fopen(path, "rb");
    assert_non_null(fp);
    fseek(fp, 0, SEEK_END);
    long len = ftell(fp);
    fseek(fp, 0, SEEK_SET);
    char *s = malloc((size_t)len + 1);
    assert_non_null(s);
    assert_int_equal(fread(s, 1, (size_t)len, fp), (size_t)len);
    s[len] = '\0';
    fclose(fp);
    if (n)
        *n = (size_t)len;
    return s;
}

static int file_exists(const char *path)
{
    struct stat st;
    return stat(path, &st) == 0;
}

/* A layer read whole: features, and a copy of the final field list. */
typedef struct layer {
    st_feature **f;
    size_t n;
    st_fields fields;
    st_status rc;        /* of open, or of the failing next */
    char crs[64];
} layer;

static void layer_free(layer *l)
{
    for (size_t i = 0; i < l->n; i++)
        st_feature_free(l->f[i]);
    st_free(l->f);
    st_fields_free(&l->fields);
    memset(l, 0, sizeof *l);
}

static st_status read_layer(const char *path, const st_read_options *opt,
                            st_diags *d, layer *l)
{
    memset(l, 0, sizeof *l);
    st_fields_init(&l->fields);
    st_reader *r = NULL;
    l->rc = st_reader_open(path, opt, d, &r);
    if (l->rc != ST_OK)
        return l->rc;
    snprintf(l->crs, sizeof l->crs, "%s", st_reader_crs(r) ? st_reader_crs(r) : "");
    size_t cap = 0;
    for (;;) {
        st_feature *f = NULL;
        l->rc = st_reader_next(r, &f);
        if (l->rc != ST_OK || !f)
            break;
        if (l->n == cap) {
            cap = cap ? cap * 2 : 16;
            st_feature **nf = st_realloc(l->f, cap * sizeof *nf);
            if (!nf) {
                st_feature_free(f);
                l->rc = ST_ERR_NOMEM;
                break;
            }
            l->f = nf;
        }
        l->f[l->n++] = f;
    }
    if (l->rc == ST_OK)
        l->rc = st_fields_copy(&l->fields, st_reader_fields(r));
    st_reader_close(r);
    return l->rc;
}

static const char *value(const layer *l, size_t i, const char *field)
{
    int32_t k = st_fields_find(&l->fields, field);
    assert_true(k >= 0);
    return st_feature_value(l->f[i], (uint32_t)k);
}

static st_field_type field_type(const layer *l, const char *field)
{
    int32_t k = st_fields_find(&l->fields, field);
    assert_true(k >= 0);
    return l->fields.items[k].type;
}

/* Text of the last diagnostic. */
static const char *last_message(const st_diags *d)
{
    assert_true(d->count > 0);
    return d->items[d->count - 1].message;
}

/* ---- reading ------------------------------------------------------------- */

static void test_read_mixed_collection(void **state)
{
    (void)state;
    st_diags d;
    st_diags_init(&d);
    layer l;
    assert_int_equal(read_layer(data_path("mixed.geojson"), NULL, &d, &l), ST_OK);
    assert_int_equal(l.n, 7);
    assert_string_equal(l.crs, "OGC:CRS84");

    /* Polygon with a hole; "id" 17 is the source id. */
    st_geom *g = &l.f[0]->geom;
    assert_int_equal(g->type, ST_GEOM_POLYGON);
    assert_int_equal(g->nparts, 1);
    assert_int_equal(g->nrings, 2);
    assert_int_equal(g->ncoords, 10);
    assert_true(g->xy[2 * 2] == 10.0 && g->xy[2 * 2 + 1] == 10.0);
    assert_true(st_geom_ring_signed_area(g, 0) == -100.0);
    assert_true(st_geom_ring_signed_area(g, 1) == 4.0);
    assert_string_equal(l.f[0]->source_id, "17");

    /* Properties of every JSON type, as text; nested values as compact JSON. */
    assert_string_equal(value(&l, 0, "name"), "Hall \"A\" \\ north");
    assert_string_equal(value(&l, 0, "levels"), "3");
    assert_string_equal(value(&l, 0, "height"), "9.50");
    assert_string_equal(value(&l, 0, "listed"), "true");
    assert_null(value(&l, 0, "note"));
    assert_string_equal(value(&l, 0, "tags"),
                        "{\"roof\":[\"flat\",2,{\"ok\":false}],\"use\":\"school\"}");
    assert_string_equal(value(&l, 0, "big"), "123456789012345678901234");
    assert_int_equal(field_type(&l, "name"), ST_FIELD_TEXT);
    assert_int_equal(field_type(&l, "levels"), ST_FIELD_INTEGER);
    assert_int_equal(field_type(&l, "height"), ST_FIELD_REAL);
    assert_int_equal(field_type(&l, "listed"), ST_FIELD_BOOLEAN);
    assert_int_equal(field_type(&l, "tags"), ST_FIELD_JSON);
    assert_int_equal(field_type(&l, "big"), ST_FIELD_REAL);
    /* "note" is null in feature 0: its type comes from 1.5e3 in feature 1. */
    assert_int_equal(field_type(&l, "note"), ST_FIELD_REAL);

    /* MultiPolygon, "coordinates" before "type"; a field seen later. */
    g = &l.f[1]->geom;
    assert_int_equal(g->type, ST_GEOM_MULTIPOLYGON);
    assert_int_equal(g->nparts, 2);
    assert_int_equal(g->nrings, 3);
    assert_int_equal(g->part_ring[1], 1);
    assert_int_equal(g->ring_coord[2] - g->ring_coord[1], 5);
    assert_string_equal(l.f[1]->source_id, "way/42");
    assert_string_equal(value(&l, 1, "name"), "Z\xC3\xBCrich \xC3\x9Cmlaut");
    assert_null(value(&l, 1, "levels"));
    assert_string_equal(value(&l, 1, "extra"), "only here");
    assert_string_equal(value(&l, 1, "note"), "1.5e3");
    assert_null(value(&l, 0, "extra"));

    /* Null geometry; no id. */
    assert_int_equal(l.f[2]->geom.type, ST_GEOM_NULL);
    assert_null(l.f[2]->source_id);
    assert_string_equal(value(&l, 2, "name"), "no place");

    /* A Point is carried with its type (Z dropped, noted). */
    g = &l.f[3]->geom;
    assert_int_equal(g->type, ST_GEOM_POINT);
    assert_int_equal(g->ncoords, 1);
    assert_true(g->xy[0] == 5.5 && g->xy[1] == 6.25);
    assert_int_equal(g->has_z, 1);

    /* GeometryCollection: only the polygon member is kept. */
    g = &l.f[4]->geom;
    assert_int_equal(g->type, ST_GEOM_COLLECTION);
    assert_int_equal(g->nparts, 1);
    assert_int_equal(g->ncoords, 4);

    /* An unclosed ring is carried as it is; "4" stays text. */
    g = &l.f[5]->geom;
    assert_int_equal(g->type, ST_GEOM_POLYGON);
    assert_int_equal(g->ncoords, 4);
    assert_string_equal(value(&l, 5, "levels"), "4");

    /* MultiLineString: one part per line. */
    g = &l.f[6]->geom;
    assert_int_equal(g->type, ST_GEOM_MULTILINESTRING);
    assert_int_equal(g->nparts, 2);
    assert_int_equal(g->nrings, 2);
    assert_int_equal(g->ring_coord[2], 5);

    assert_int_equal(d.errors, 0);
    layer_free(&l);
    st_diags_free(&d);
}

static void test_read_single_feature(void **state)
{
    (void)state;
    st_diags d;
    st_diags_init(&d);
    layer l;
    assert_int_equal(read_layer(data_path("feature.geojson"), NULL, &d, &l), ST_OK);
    assert_int_equal(l.n, 1);
    assert_string_equal(l.f[0]->source_id, "5");
    assert_string_equal(value(&l, 0, "name"), "alone");
    assert_int_equal(l.f[0]->geom.type, ST_GEOM_POLYGON);
    assert_int_equal(l.f[0]->geom.ncoords, 4);
    layer_free(&l);
    st_diags_free(&d);
}

static void test_read_geojsonl_rs_blank_lines(void **state)
{
    (void)state;
    st_diags d;
    st_diags_init(&d);
    layer l;
    assert_int_equal(read_layer(data_path("seq.geojsonl"), NULL, &d, &l), ST_OK);
    assert_int_equal(l.n, 3);
    assert_string_equal(l.f[0]->source_id, "1");
    assert_string_equal(l.f[1]->source_id, "2");
    assert_null(l.f[2]->source_id);
    assert_string_equal(value(&l, 0, "a"), "1");
    assert_string_equal(value(&l, 1, "b"), "x");
    assert_string_equal(value(&l, 2, "a"), "3");
    assert_int_equal(l.f[1]->geom.type, ST_GEOM_NULL);
    assert_int_equal(l.f[2]->geom.type, ST_GEOM_POLYGON);
    layer_free(&l);

    /* An empty sequence is an empty layer. */
    write_file(tmp_path("empty.geojsonl"), "\n\n", 2);
    assert_int_equal(read_layer(tmp_path("empty.geojsonl"), NULL, &d, &l), ST_OK);
    assert_int_equal(l.n, 0);
    layer_free(&l);
    st_diags_free(&d);
}

static void test_read_geojsonl_error_has_line(void **state)
{
    (void)state;
    static const char text[] =
        "{\"type\":\"Feature\",\"properties\":{},\"geometry\":null}\n"
        "\n"
        "{\"type\":\"Feature\",\"properties\":{},\"geometry\":null}\n"
        "{\"type\":\"Feature\",\"properties\":{\"a\":tru},\"geometry\":null}\n";
    write_file(tmp_path("bad.ndjson"), text, sizeof text - 1);
    st_diags d;
    st_diags_init(&d);
    layer l;
    assert_int_equal(read_layer(tmp_path("bad.ndjson"), NULL, &d, &l), ST_ERR_FORMAT);
    assert_int_equal(l.n, 2);   /* the features before the error came through */
    assert_int_equal(d.items[d.count - 1].line, 4);
    assert_int_equal(d.items[d.count - 1].feature, 2);
    assert_non_null(strstr(last_message(&d), "feature 2"));
    layer_free(&l);
    st_diags_free(&d);
}

/* A few-MB collection read through many 64 KiB chunk boundaries. */
static void test_read_across_chunks(void **state)
{
    (void)state;
    const char *path = tmp_path("big.geojson");
    FILE *fp = fopen(path, "wb");
    assert_non_null(fp);
    fputs("{\"type\":\"FeatureCollection\",\"features\":[\n", fp);
    const int count = 20000;
    for (int i = 0; i < count; i++) {
        double x = 10.0 + i * 1e-4, y = 45.0 + (i % 97) * 1e-4;
        /* Varying lengths move the features across chunk boundaries. */
        fprintf(fp, "%s{\"type\":\"Feature\",\"id\":%d,\"properties\":{\"name\":\"b%d%.*s\","
                "\"n\":%d,\"escaped\":\"a\\\"\\u00e9\\n\"},\"geometry\":{\"type\":\"Polygon\","
                "\"coordinates\":[[[%.7f,%.7f],[%.7f,%.7f],[%.7f,%.7f],[%.7f,%.7f]]]}}\n",
                i ? "," : "", i, i, i % 53, "xxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxx",
                i, x, y, x + 1e-4, y, x + 1e-4, y + 1e-4, x, y);
    }
    fputs("]}\n", fp);
    assert_int_equal(fclose(fp), 0);
    struct stat st;
    assert_int_equal(stat(path, &st), 0);
    assert_true(st.st_size > 3 * 1024 * 1024);

    st_diags d;
    st_diags_init(&d);
    st_reader *r = NULL;
    assert_int_equal(st_reader_open(path, NULL, &d, &r), ST_OK);
    long long done, total;
    int n = 0, ok = 1;
    for (;;) {
        st_feature *f = NULL;
        assert_int_equal(st_reader_next(r, &f), ST_OK);
        if (!f)
            break;
        char want[32];
        snprintf(want, sizeof want, "%d", n);
        ok &= strcmp(f->source_id, want) == 0;
        ok &= strcmp(st_feature_value(f, 1), want) == 0;
        ok &= strcmp(st_feature_value(f, 2), "a\"\xC3\xA9\n") == 0;
        snprintf(want, sizeof want, "%.7f", 10.0 + n * 1e-4);
        ok &= f->geom.ncoords == 4 && f->geom.xy[0] == strtod(want, NULL);
        st_feature_free(f);
        n++;
    }
    st_reader_progress(r, &done, &total);
    assert_int_equal(done, total);
    assert_int_equal(total, st.st_size);
    assert_int_equal(st_reader_count_hint(r), -1);
    assert_int_equal(st_reader_schema_fixed(r), 0);
    st_reader_close(r);
    assert_int_equal(n, count);
    assert_true(ok);
    st_diags_free(&d);
}

static void test_read_truncated(void **state)
{
    (void)state;
    st_diags d;
    st_diags_init(&d);
    layer l;
    assert_int_equal(read_layer(data_path("truncated.geojson"), NULL, &d, &l), ST_ERR_FORMAT);
    assert_int_equal(l.n, 1);
    const st_diag *g = &d.items[d.count - 1];
    assert_int_equal(g->feature, 1);
    assert_int_equal(g->line, 4);   /* the file ends after its third line */
    size_t size;
    free(slurp(data_path("truncated.geojson"), &size));
    assert_int_equal(g->offset, (long long)size);
    assert_non_null(strstr(g->message, "truncated"));
    assert_non_null(strstr(g->message, "feature 1"));
    layer_free(&l);
    st_diags_free(&d);
}

static void test_read_bad_token(void **state)
{
    (void)state;
    st_diags d;
    st_diags_init(&d);
    layer l;
    assert_int_equal(read_layer(data_path("bad_token.geojson"), NULL, &d, &l), ST_ERR_FORMAT);
    assert_int_equal(l.n, 3);   /* features 0..2 were returned first */
    char *text = slurp(data_path("bad_token.geojson"), NULL);
    long long at = strchr(text, '@') - text;
    free(text);
    const st_diag *g = &d.items[d.count - 1];
    assert_int_equal(g->feature, 3);
    assert_int_equal(g->line, 5);
    assert_true(g->offset >= at && g->offset <= at + 1);
    char want[64];
    snprintf(want, sizeof want, "feature 3 (byte %lld)", g->offset);
    assert_non_null(strstr(g->message, want));
    assert_non_null(strstr(g->message, "malformed JSON"));
    /* The rendered line names the file and line. */
    st_buf b;
    st_buf_init(&b, 0);
    assert_int_equal(st_diag_render(g, &b), ST_OK);
    assert_non_null(strstr(b.data, "bad_token.geojson:5: error: feature 3 (byte "));
    st_buf_free(&b);
    layer_free(&l);
    st_diags_free(&d);
}

static void expect_format_error(const char *name, const char *words, size_t before)
{
    st_diags d;
    st_diags_init(&d);
    layer l;
    assert_int_equal(read_layer(data_path(name), NULL, &d, &l), ST_ERR_FORMAT);
    assert_int_equal(l.n, before);
    if (!strstr(last_message(&d), words))
        fail_msg("%s: '%s' not in '%s'", name, words, last_message(&d));
    layer_free(&l);
    st_diags_free(&d);
}

static void test_read_structure_errors(void **state)
{
    (void)state;
    expect_format_error("no_features.geojson", "no \"features\"", 0);
    expect_format_error("not_feature.geojson", "expected \"Feature\"", 1);
    expect_format_error("string_coords.geojson", "\"coordinates\" hold a string", 0);
    expect_format_error("short_position.geojson", "at least 2", 0);
    static const char bare[] = "{\"type\":\"Polygon\",\"coordinates\":[]}";
    write_file(tmp_path("bare.geojson"), bare, sizeof bare - 1);
    st_diags d;
    st_diags_init(&d);
    st_reader *r = NULL;
    assert_int_equal(st_reader_open(tmp_path("bare.geojson"), NULL, &d, &r), ST_ERR_FORMAT);
    assert_null(r);
    assert_non_null(strstr(last_message(&d), "expected a FeatureCollection or a Feature"));
    st_diags_free(&d);
}

/* 'head' followed by 10000 '['. */
static void write_deep(const char *name, const char *head)
{
    size_t h = strlen(head), n = h + 10000;
    char *text = malloc(n);
    assert_non_null(text);
    memcpy(text, head, h);
    memset(text + h, '[', 10000);
    write_file(tmp_path(name), text, n);
    free(text);
}

static void test_read_deep_nesting_is_limit(void **state)
{
    (void)state;
    write_deep("deep.geojson", "{\"type\":\"FeatureCollection\",\"features\":["
               "{\"type\":\"Feature\",\"geometry\":null,\"properties\":{\"a\":");
    write_deep("deep2.geojson", "{\"type\":\"Feature\",\"properties\":{},"
               "\"geometry\":{\"type\":\"Point\",\"coordinates\":");

    st_diags d;
    st_diags_init(&d);
    layer l;
    assert_int_equal(read_layer(tmp_path("deep.geojson"), NULL, &d, &l), ST_ERR_LIMIT);
    assert_non_null(strstr(last_message(&d), "nested more than 64 deep"));
    layer_free(&l);
    assert_int_equal(read_layer(tmp_path("deep2.geojson"), NULL, &d, &l), ST_ERR_FORMAT);
    assert_non_null(strstr(last_message(&d), "nested too deeply"));
    layer_free(&l);
    st_diags_free(&d);
}

static void test_read_long_string_is_limit(void **state)
{
    (void)state;
    static const char head[] = "{\"type\":\"Feature\",\"geometry\":null,\"properties\":{\"a\":\"";
    size_t n = sizeof head - 1 + 2 * 1024 * 1024;
    char *text = malloc(n);
    assert_non_null(text);
    memcpy(text, head, sizeof head - 1);
    memset(text + sizeof head - 1, 'x', n - (sizeof head - 1));
    write_file(tmp_path("long.geojson"), text, n);
    free(text);
    st_diags d;
    st_diags_init(&d);
    layer l;
    assert_int_equal(read_layer(tmp_path("long.geojson"), NULL, &d, &l), ST_ERR_LIMIT);
    assert_non_null(strstr(last_message(&d), "longer than 1 MiB"));
    assert_true(d.items[d.count - 1].offset >= 1024 * 1024);
    layer_free(&l);
    st_diags_free(&d);
}

static void test_read_invalid_utf8_replaced(void **state)
{
    (void)state;
    static const char text[] =
        "{\"type\":\"FeatureCollection\",\"features\":[{\"type\":\"Feature\","
        "\"properties\":{\"name\":\"B\xE2timent \xC3\x28\",\"k\xFF\":{\"x\":\"\x80\"}},"
        "\"geometry\":null}]}";
    write_file(tmp_path("utf8.geojson"), text, sizeof text - 1);
    st_diags d;
    st_diags_init(&d);
    layer l;
    assert_int_equal(read_layer(tmp_path("utf8.geojson"), NULL, &d, &l), ST_OK);
    assert_int_equal(l.n, 1);
    assert_string_equal(value(&l, 0, "name"), "B\xEF\xBF\xBDtiment \xEF\xBF\xBD(");
    assert_string_equal(value(&l, 0, "k\xEF\xBF\xBD"), "{\"x\":\"\xEF\xBF\xBD\"}");
    layer_free(&l);
    st_diags_free(&d);
}

static void test_read_crs_member(void **state)
{
    (void)state;
    st_diags d;
    st_diags_init(&d);
    st_read_options opt = ST_READ_OPTIONS_DEFAULT;
    opt.keep_source_crs = 1;   /* this test is about the name, not PROJ */
    st_reader *r = NULL;
    assert_int_equal(st_reader_open(data_path("crs_utm.geojson"), &opt, &d, &r), ST_OK);
    assert_string_equal(st_reader_crs(r), "EPSG:32643");
    st_feature *f = NULL;
    assert_int_equal(st_reader_next(r, &f), ST_OK);
    assert_non_null(f);
    assert_true(f->geom.xy[0] == 776000.5 && f->geom.xy[1] == 1428000.25);
    st_feature_free(f);
    st_reader_close(r);

    layer l;
    assert_int_equal(read_layer(data_path("crs_late.geojson"), NULL, &d, &l), ST_ERR_FORMAT);
    assert_int_equal(l.n, 1);
    assert_non_null(strstr(last_message(&d), "\"crs\" member (EPSG:3857) comes after"));
    layer_free(&l);
    st_diags_free(&d);
}

static void test_read_bom_and_repeated_crs(void **state)
{
    (void)state;
    static const char text[] =
        "\xEF\xBB\xBF{\"type\":\"FeatureCollection\",\"features\":[{\"type\":\"Feature\","
        "\"properties\":{},\"geometry\":null}],"
        "\"crs\":{\"type\":\"name\",\"properties\":{\"name\":\"urn:ogc:def:crs:OGC:1.3:CRS84\"}}}";
    write_file(tmp_path("bom.geojson"), text, sizeof text - 1);
    st_diags d;
    st_diags_init(&d);
    layer l;
    /* A late "crs" naming the CRS already in use is no error. */
    assert_int_equal(read_layer(tmp_path("bom.geojson"), NULL, &d, &l), ST_OK);
    assert_int_equal(l.n, 1);
    assert_string_equal(l.crs, "OGC:CRS84");
    layer_free(&l);
    st_diags_free(&d);
}

/* Every allocation of a small read fails in turn: NOMEM, nothing leaked
** (leaks are caught by the sanitizer build and valgrind). */
static void test_read_allocation_failures(void **state)
{
    (void)state;
    const char *files[] = {data_path("mixed.geojson"), data_path("seq.geojsonl")};
    for (size_t k = 0; k < 2; k++) {
        char path[1024];
        snprintf(path, sizeof path, "%s", files[k]);
        long n, nomem = 0;
        for (n = 1; n < 100000; n++) {
            st_diags d;
            st_diags_init(&d);
            layer l;
            st_alloc_fail_after(n);
            st_status rc = read_layer(path, NULL, &d, &l);
            long used = st_alloc_count();
            st_alloc_fail_after(0);
            layer_free(&l);
            st_diags_free(&d);
            if (rc == ST_OK && used < n)
                break;   /* all allocations succeeded */
            /* OK despite a failure: the generic reader falls back to the
            ** CRS text when naming it fails (io/reader.c setup_crs). */
            if (rc != ST_ERR_NOMEM && rc != ST_OK)
                fail_msg("%s: allocation %ld failed, status %s", path, n, st_status_name(rc));
            nomem += rc == ST_ERR_NOMEM;
        }
        assert_true(n > 20);
        assert_true(nomem >= n - 2);   /* all but the fallback and the last */
    }
}

/* ---- writing ------------------------------------------------------------- */

static st_feature *make_feature(const char *id, const char *const *values, uint32_t nv)
{
    st_feature *f = st_feature_new();
    assert_non_null(f);
    if (id)
        f->source_id = st_strdup(id);
    for (uint32_t i = 0; i < nv; i++)
        assert_int_equal(st_feature_set_value(f, i, values[i], values[i] ? strlen(values[i]) : 0), ST_OK);
    return f;
}

/* A polygon whose shell is clockwise and hole counter-clockwise (the
** Shapefile order), with coordinates that need 17 digits. */
static void cw_polygon(st_geom *g, double x0, double y0)
{
    if (g->type == ST_GEOM_NULL)
        g->type = ST_GEOM_POLYGON;
    const double s[][2] = {{0, 0}, {0, 1.0 / 3}, {0.1 + 0.2, 1.0 / 3}, {0.1 + 0.2, 0}, {0, 0}};
    const double h[][2] = {{0.1, 0.1}, {0.2, 0.1}, {0.2, 0.2}, {0.1, 0.2}, {0.1, 0.1}};
    assert_int_equal(st_geom_begin_part(g), ST_OK);
    assert_int_equal(st_geom_begin_ring(g), ST_OK);
    for (int i = 0; i < 5; i++)
        assert_int_equal(st_geom_add_xy(g, x0 + s[i][0] * 1e-3, y0 + s[i][1] * 1e-3), ST_OK);
    assert_int_equal(st_geom_begin_ring(g), ST_OK);
    for (int i = 0; i < 5; i++)
        assert_int_equal(st_geom_add_xy(g, x0 + h[i][0] * 1e-3, y0 + h[i][1] * 1e-3), ST_OK);
}

static double ring_area(const st_geom *g, uint32_t r) { return st_geom_ring_signed_area(g, r); }

static void fields_for_writing(st_fields *fl)
{
    st_fields_init(fl);
    assert_int_equal(st_fields_add(fl, "name", ST_FIELD_TEXT, 0, 0, NULL), ST_OK);
    assert_int_equal(st_fields_add(fl, "levels", ST_FIELD_INTEGER, 0, 0, NULL), ST_OK);
    assert_int_equal(st_fields_add(fl, "height", ST_FIELD_REAL, 0, 0, NULL), ST_OK);
    assert_int_equal(st_fields_add(fl, "listed", ST_FIELD_BOOLEAN, 0, 0, NULL), ST_OK);
    assert_int_equal(st_fields_add(fl, "tags", ST_FIELD_JSON, 0, 0, NULL), ST_OK);
    assert_int_equal(st_fields_add(fl, "a \"quoted\" name", ST_FIELD_TEXT, 0, 0, NULL), ST_OK);
}

static const char special[] = "q\"uote b\\ack\nnew\ttab \x01 \xD0\x9A\xD1\x80\xD0\xBE\xD0\xBD "
                              "</script> \xE2\x80\xA8";

static void write_sample(const char *path, int commit)
{
    st_diags d;
    st_diags_init(&d);
    st_writer *w = NULL;
    assert_int_equal(st_writer_open(path, &d, &w), ST_OK);
    st_fields fl;
    fields_for_writing(&fl);
    assert_int_equal(st_writer_begin_layer(w, "sample", &fl, ST_GEOM_POLYGON), ST_OK);

    const char *v0[] = {special, "7", "12.25", "T", "{ \"a\" : [1, 2.50, null] }", "x"};
    st_feature *f = make_feature("101", v0, 6);
    cw_polygon(&f->geom, 8.54, 47.37);
    assert_int_equal(st_writer_write(w, f), ST_OK);
    st_feature_free(f);

    const char *v1[] = {NULL, "seven", "1e400x", "maybe", "{broken", NULL};
    f = make_feature("way/9", v1, 6);
    f->geom.type = ST_GEOM_MULTIPOLYGON;
    cw_polygon(&f->geom, -70.1, -33.4);
    cw_polygon(&f->geom, -70.2, -33.5);
    assert_int_equal(st_writer_write(w, f), ST_OK);
    st_feature_free(f);

    f = make_feature(NULL, NULL, 0);   /* null geometry, all values missing */
    assert_int_equal(st_writer_write(w, f), ST_OK);
    st_feature_free(f);

    assert_int_equal(st_writer_end_layer(w), ST_OK);
    if (commit)
        assert_int_equal(st_writer_commit(w), ST_OK);
    st_writer_close(w);
    st_fields_free(&fl);
    assert_int_equal(d.errors, 0);
    st_diags_free(&d);
}

static void check_sample(const char *path)
{
    st_diags d;
    st_diags_init(&d);
    layer l;
    assert_int_equal(read_layer(path, NULL, &d, &l), ST_OK);
    assert_int_equal(l.n, 3);

    /* Attributes come back by type. */
    assert_string_equal(l.f[0]->source_id, "101");
    assert_string_equal(value(&l, 0, "name"), special);
    assert_string_equal(value(&l, 0, "levels"), "7");
    assert_string_equal(value(&l, 0, "height"), "12.25");
    assert_string_equal(value(&l, 0, "listed"), "true");
    assert_string_equal(value(&l, 0, "tags"), "{\"a\":[1,2.50,null]}");
    assert_string_equal(value(&l, 0, "a \"quoted\" name"), "x");
    assert_int_equal(field_type(&l, "levels"), ST_FIELD_INTEGER);
    assert_int_equal(field_type(&l, "height"), ST_FIELD_REAL);
    assert_int_equal(field_type(&l, "listed"), ST_FIELD_BOOLEAN);
    assert_int_equal(field_type(&l, "tags"), ST_FIELD_JSON);
    assert_string_equal(l.f[1]->source_id, "way/9");
    assert_null(value(&l, 1, "name"));
    assert_string_equal(value(&l, 1, "levels"), "seven");
    assert_string_equal(value(&l, 1, "height"), "1e400x");
    assert_string_equal(value(&l, 1, "listed"), "maybe");
    assert_string_equal(value(&l, 1, "tags"), "{broken");
    for (uint32_t i = 0; i < l.fields.count; i++)
        assert_null(st_feature_value(l.f[2], i));

    /* Geometry: the same coordinates, exterior CCW and holes CW
    ** (RFC 7946 section 3.1.6), areas equal to the source's. */
    st_geom src;
    st_geom_init(&src);
    cw_polygon(&src, 8.54, 47.37);
    const st_geom *g = &l.f[0]->geom;
    assert_int_equal(g->type, ST_GEOM_POLYGON);
    assert_int_equal(g->nrings, 2);
    assert_true(ring_area(g, 0) > 0);
    assert_true(ring_area(g, 1) < 0);
    assert_true(fabs(fabs(ring_area(g, 0)) - fabs(ring_area(&src, 0))) <=
                1e-9 * fabs(ring_area(&src, 0)));
    /* Every coordinate comes back bit for bit (shortest round-trip text). */
    st_geom_orient(&src, 1);
    for (uint32_t i = 0; i < 2 * src.ncoords; i++)
        assert_true(g->xy[i] == src.xy[i]);
    st_geom_clear(&src);
    g = &l.f[1]->geom;
    assert_int_equal(g->type, ST_GEOM_MULTIPOLYGON);
    assert_int_equal(g->nparts, 2);
    for (uint32_t p = 0; p < 2; p++) {
        assert_true(ring_area(g, g->part_ring[p]) > 0);
        assert_true(ring_area(g, g->part_ring[p] + 1) < 0);
    }
    assert_int_equal(l.f[2]->geom.type, ST_GEOM_NULL);
    layer_free(&l);
    st_diags_free(&d);
}

/* Like write_sample, without assertions: the first failing status. */
static st_status try_write(const char *path, const st_fields *fl, st_diags *d)
{
    st_writer *w = NULL;
    const char *v0[] = {special, "7", "12.25", "T", "[1, {\"a\": 2}]", "x\xFF"};
    st_feature *f = st_feature_new();
    st_status rc = f ? ST_OK : ST_ERR_NOMEM;
    for (uint32_t i = 0; rc == ST_OK && i < 6; i++)
        rc = st_feature_set_value(f, i, v0[i], strlen(v0[i]));
    if (rc == ST_OK && !(f->source_id = st_strdup("9")))
        rc = ST_ERR_NOMEM;
    if (rc == ST_OK)
        rc = st_geom_begin_part(&f->geom);
    for (int i = 0; rc == ST_OK && i < 4; i++)
        rc = st_geom_add_xy(&f->geom, i == 1 || i == 2, i >= 2);
    if (rc == ST_OK) {
        f->geom.type = ST_GEOM_POLYGON;
        rc = st_writer_open(path, d, &w);
    }
    if (rc == ST_OK)
        rc = st_writer_begin_layer(w, "x", fl, ST_GEOM_POLYGON);
    for (int i = 0; rc == ST_OK && i < 3; i++)
        rc = st_writer_write(w, f);
    if (rc == ST_OK)
        rc = st_writer_commit(w);
    st_writer_close(w);
    st_feature_free(f);
    return rc;
}

static void test_write_allocation_failures(void **state)
{
    (void)state;
    const char *path = tmp_path("alloc.geojson");
    st_fields fl;
    fields_for_writing(&fl);
    long n;
    for (n = 1; n < 10000; n++) {
        st_diags d;
        st_diags_init(&d);
        st_alloc_fail_after(n);
        st_status rc = try_write(path, &fl, &d);
        long used = st_alloc_count();
        st_alloc_fail_after(0);
        st_diags_free(&d);
        if (rc == ST_OK && used < n)
            break;
        if (rc != ST_ERR_NOMEM)
            fail_msg("allocation %ld failed, status %s", n, st_status_name(rc));
        if (file_exists(path))
            fail_msg("allocation %ld failed: %s left behind", n, path);
    }
    assert_true(n > 10);
    assert_true(file_exists(path));
    remove(path);
    st_fields_free(&fl);
}

static void test_write_geojson_roundtrip(void **state)
{
    (void)state;
    const char *path = tmp_path("out.geojson");
    write_sample(path, 1);
    check_sample(path);
    char *text = slurp(path, NULL);
    assert_null(strstr(text, "\"crs\""));   /* RFC 7946 Appendix B.1 */
    assert_non_null(strstr(text, "\"type\":\"FeatureCollection\""));
    assert_non_null(strstr(text, "\"id\":101,"));
    assert_non_null(strstr(text, "\"id\":\"way/9\""));
    assert_non_null(strstr(text, "\"q\\\"uote b\\\\ack\\nnew\\ttab \\u0001 "));
    assert_non_null(strstr(text, "\"levels\":7,"));
    assert_non_null(strstr(text, "\"levels\":\"seven\""));
    assert_non_null(strstr(text, "\"listed\":true"));
    assert_non_null(strstr(text, "\"tags\":{\"a\":[1,2.50,null]}"));
    assert_non_null(strstr(text, "\"tags\":\"{broken\""));
    assert_non_null(strstr(text, "\"geometry\":null"));
    free(text);
}

static void test_write_geojsonl_one_per_line(void **state)
{
    (void)state;
    const char *path = tmp_path("out.geojsonl");
    write_sample(path, 1);
    check_sample(path);
    char *text = slurp(path, NULL);
    int lines = 0;
    for (char *p = text; *p; p++)
        lines += *p == '\n';
    assert_int_equal(lines, 3);
    assert_int_equal(text[0], '{');
    free(text);

    const char *seq = tmp_path("out.geojsons");
    write_sample(seq, 1);
    check_sample(seq);
    text = slurp(seq, NULL);
    assert_int_equal(text[0], 0x1E);   /* RFC 8142 record separator */
    free(text);
}

static void test_write_without_commit_leaves_nothing(void **state)
{
    (void)state;
    char dir[512];
    snprintf(dir, sizeof dir, "%s/nocommit", tmpdir);
    assert_int_equal(mkdir(dir, 0700), 0);
    char path[600];
    snprintf(path, sizeof path, "%s/x.geojson", dir);
    write_sample(path, 0);
    assert_false(file_exists(path));
    /* The folder is empty: no temporary file left behind. */
    char cmd[700];
    snprintf(cmd, sizeof cmd, "rmdir '%s'", dir);
    assert_int_equal(system(cmd), 0);
}

static void test_write_refuses_nan(void **state)
{
    (void)state;
    const char *path = tmp_path("nan.geojson");
    st_diags d;
    st_diags_init(&d);
    st_writer *w = NULL;
    assert_int_equal(st_writer_open(path, &d, &w), ST_OK);
    st_fields fl;
    st_fields_init(&fl);
    assert_int_equal(st_writer_begin_layer(w, "x", &fl, ST_GEOM_POLYGON), ST_OK);
    st_feature *f = make_feature("way/5", NULL, 0);
    cw_polygon(&f->geom, 1, 1);
    f->geom.xy[3] = NAN;
    assert_int_equal(st_writer_write(w, f), ST_ERR_FORMAT);
    assert_non_null(strstr(last_message(&d), "feature 0 (id way/5): coordinate 2 is NaN"));
    f->geom.xy[3] = INFINITY;
    assert_int_equal(st_writer_write(w, f), ST_ERR_FORMAT);
    assert_non_null(strstr(last_message(&d), "infinite"));
    st_feature_free(f);
    st_writer_close(w);
    assert_false(file_exists(path));
    st_fields_free(&fl);
    st_diags_free(&d);
}

/* Coordinates print as the shortest text that reads back the same. */
static void test_write_shortest_coordinates(void **state)
{
    (void)state;
    const char *path = tmp_path("short.geojson");
    st_diags d;
    st_diags_init(&d);
    st_writer *w = NULL;
    assert_int_equal(st_writer_open(path, &d, &w), ST_OK);
    st_fields fl;
    st_fields_init(&fl);
    assert_int_equal(st_writer_begin_layer(w, "x", &fl, ST_GEOM_POINT), ST_OK);
    st_feature *f = make_feature(NULL, NULL, 0);
    f->geom.type = ST_GEOM_POINT;
    assert_int_equal(st_geom_add_xy(&f->geom, 8.540025, 0.1 + 0.2), ST_OK);
    assert_int_equal(st_writer_write(w, f), ST_OK);
    st_feature_free(f);
    assert_int_equal(st_writer_commit(w), ST_OK);
    st_writer_close(w);
    char *text = slurp(path, NULL);
    assert_non_null(strstr(text, "\"coordinates\":[8.540025,0.30000000000000004]"));
    free(text);
    st_fields_free(&fl);
    st_diags_free(&d);
}

/* ---- real extracts, against GDAL's ogrinfo ------------------------------ */

/* Feature count as GDAL's ogrinfo reports it, or -1 without ogrinfo. */
static long ogr_count(const char *path)
{
    char cmd[1200];
    snprintf(cmd, sizeof cmd, "ogrinfo -ro -so -al '%s' 2>/dev/null", path);
    FILE *p = popen(cmd, "r");
    if (!p)
        return -1;
    char line[512];
    long n = -1;
    while (fgets(line, sizeof line, p))
        if (strncmp(line, "Feature Count: ", 15) == 0 && n < 0)
            n = atol(line + 15);
    pclose(p);
    return n;
}

static void check_real(const char *name, int expect_cyrillic)
{
    const char *path = real_path(name);
    if (!file_exists(path))
        skip();
    long want = ogr_count(path);
    if (want < 0)
        skip();
    st_diags d;
    st_diags_init(&d);
    layer l;
    assert_int_equal(read_layer(path, NULL, &d, &l), ST_OK);
    assert_int_equal((long)l.n, want);
    if (expect_cyrillic) {
        size_t found = 0;
        int32_t k = st_fields_find(&l.fields, "addr:city");
        assert_true(k >= 0);
        for (size_t i = 0; i < l.n; i++) {
            const char *v = st_feature_value(l.f[i], (uint32_t)k);
            if (v) {
                assert_string_equal(v, "\xD0\x9A\xD1\x80\xD0\xBE\xD0\xBD\xD1\x88\xD1\x82"
                                       "\xD0\xB0\xD0\xB4\xD1\x82");   /* Кронштадт */
                found++;
            }
        }
        assert_true(found > 0);
    }
    for (size_t i = 0; i < l.n; i++)
        assert_true(l.f[i]->geom.type == ST_GEOM_POLYGON ||
                    l.f[i]->geom.type == ST_GEOM_MULTIPOLYGON);
    layer_free(&l);
    st_diags_free(&d);
}

static void test_real_kronstadt(void **state) { (void)state; check_real("kronstadt/buildings.geojson", 1); }
static void test_real_banepa(void **state) { (void)state; check_real("banepa/buildings.geojson", 0); }
static void test_real_fianarantsoa(void **state) { (void)state; check_real("fianarantsoa/building.geojson", 0); }

/* ---- main ---------------------------------------------------------------- */

static int setup(void **state)
{
    (void)state;
    snprintf(tmpdir, sizeof tmpdir, "%s/st-geojson-XXXXXX",
             getenv("TMPDIR") ? getenv("TMPDIR") : "/tmp");
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
        cmocka_unit_test(test_read_mixed_collection),
        cmocka_unit_test(test_read_single_feature),
        cmocka_unit_test(test_read_geojsonl_rs_blank_lines),
        cmocka_unit_test(test_read_geojsonl_error_has_line),
        cmocka_unit_test(test_read_across_chunks),
        cmocka_unit_test(test_read_truncated),
        cmocka_unit_test(test_read_bad_token),
        cmocka_unit_test(test_read_structure_errors),
        cmocka_unit_test(test_read_deep_nesting_is_limit),
        cmocka_unit_test(test_read_long_string_is_limit),
        cmocka_unit_test(test_read_invalid_utf8_replaced),
        cmocka_unit_test(test_read_crs_member),
        cmocka_unit_test(test_read_bom_and_repeated_crs),
        cmocka_unit_test(test_read_allocation_failures),
        cmocka_unit_test(test_write_allocation_failures),
        cmocka_unit_test(test_write_geojson_roundtrip),
        cmocka_unit_test(test_write_geojsonl_one_per_line),
        cmocka_unit_test(test_write_without_commit_leaves_nothing),
        cmocka_unit_test(test_write_refuses_nan),
        cmocka_unit_test(test_write_shortest_coordinates),
        cmocka_unit_test(test_real_kronstadt),
        cmocka_unit_test(test_real_banepa),
        cmocka_unit_test(test_real_fianarantsoa),
    };
    return cmocka_run_group_tests(tests, setup, teardown);
}
