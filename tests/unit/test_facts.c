/*
** tests/unit/test_facts.c -- the layer facts file (facts.h): gathered from
** features (text in a numeric field, features without coordinates, dense
** and gappy fids, the extent), written and read back equal, and every kind
** of damage refused with ST_ERR_FORMAT and a message naming the file and
** the line: a changed value (digest), a cut file, a missing or extra line,
** bad numbers, escapes, flags and positions, text after the digest, an
** unknown version. The checks against the inputs (changed file, other
** inputs) are in tests/e2e/test_tiles_facts.sh.
*/
#define _GNU_SOURCE
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>
#include <cmocka.h>
#include <math.h>

#include "stocktake/facts.h"
#include "stocktake/sha256.h"
#include "scratch.h"

typedef struct fixture {
    char dir[64];
    char path[128];
} fixture;

static int setup(void **state)
{
    fixture *fx = calloc(1, sizeof *fx);
    if (!fx)
        return -1;
    snprintf(fx->dir, sizeof fx->dir, "/tmp/st_facts_XXXXXX");
    if (!mkdtemp(fx->dir)) {
        free(fx);
        return -1;
    }
    snprintf(fx->path, sizeof fx->path, "%s/facts.txt", fx->dir);
    *state = fx;
    return 0;
}

static int teardown(void **state)
{
    fixture *fx = *state;
    int rc = scratch_remove(fx->dir);
    free(fx);
    return rc;
}

static st_feature *square(uint64_t index, const char *fid, double x, double y)
{
    st_feature *f = st_feature_new();
    assert_non_null(f);
    f->index = index;
    f->source_id = fid ? st_strdup(fid) : NULL;
    if (x == x) {   /* NaN: no coordinates */
        double xy[10] = {x, y, x + 1, y, x + 1, y + 1, x, y + 1, x, y};
        f->geom.type = ST_GEOM_POLYGON;
        assert_int_equal(st_geom_begin_part(&f->geom), ST_OK);
        assert_int_equal(st_geom_begin_ring(&f->geom), ST_OK);
        for (int k = 0; k < 5; k++)
            assert_int_equal(st_geom_add_xy(&f->geom, xy[2 * k], xy[2 * k + 1]), ST_OK);
    }
    return f;
}

/* Two layers: a GeoPackage with dense fids from 7, one feature without
** coordinates and a text value in its numeric field; a layer whose fids
** have a gap. */
static void make_facts(st_facts *facts)
{
    memset(facts, 0, sizeof *facts);
    facts->layers = calloc(2, sizeof *facts->layers);
    assert_non_null(facts->layers);
    st_fields fl;
    st_fields_init(&fl);
    assert_int_equal(st_fields_add(&fl, "levels", ST_FIELD_INTEGER, 0, 0, NULL), ST_OK);
    assert_int_equal(st_fields_add(&fl, "name", ST_FIELD_TEXT, 0, 0, NULL), ST_OK);
    for (int l = 0; l < 2; l++) {
        st_facts_layer *lf = &facts->layers[facts->n++];
        st_facts_scan sc;
        st_facts_scan_begin(&sc, lf);
        for (uint64_t i = 0; i < 40; i++) {
            char fid[32];
            snprintf(fid, sizeof fid, "%llu", (unsigned long long)(l == 0 ? 7 + i : i + (i > 5)));
            st_feature *f = square(i, fid, i == 3 ? NAN : 10.0 + (double)i, 50.0);
            assert_int_equal(st_feature_set_value(f, 0, i == 9 ? "2b" : "2", i == 9 ? 2 : 1),
                             ST_OK);
            assert_int_equal(st_facts_scan_feature(&sc, lf, &fl, f, 1), ST_OK);
            st_feature_free(f);
        }
        assert_int_equal(st_facts_scan_end(&sc, lf, &fl), ST_OK);
        lf->spec = st_strdup(l == 0 ? "a b%.gpkg:layer" : "c.gpkg");
        lf->file = st_strdup(l == 0 ? "a b%.gpkg" : "c.gpkg");
        lf->format = st_strdup("gpkg");
        lf->name = st_strdup(l == 0 ? "layer" : "c");
        lf->crs = st_strdup(l == 0 ? "EPSG:4326" : "");
        lf->size = 1234;
        lf->mtime_s = 1700000000;
        lf->mtime_ns = 123456789;
    }
    st_fields_free(&fl);
}

static void test_scan(void **state)
{
    (void)state;
    st_facts facts;
    make_facts(&facts);
    const st_facts_layer *a = &facts.layers[0], *b = &facts.layers[1];
    assert_int_equal(a->count, 40);
    assert_true(a->dense);
    assert_int_equal(a->fid_min, 7);
    assert_false(b->dense);
    assert_int_equal(a->ncoordless, 1);
    assert_int_equal(a->coordless[0], 3);
    assert_int_equal(a->nfields, 2);
    assert_int_equal(a->text[0], 1);
    assert_int_equal(a->text[1], 0);
    assert_true(a->extent.valid);
    assert_true(a->extent.xmin < 30.0 && a->extent.xmax > 30.0);   /* the middle */
    assert_true(st_facts_same_content(a, b));
    st_facts_free(&facts);
}

static void test_round_trip(void **state)
{
    fixture *fx = *state;
    st_facts facts, back;
    make_facts(&facts);
    st_diags d;
    st_diags_init(&d);
    assert_int_equal(st_facts_write(&facts, fx->path, &d), ST_OK);
    assert_int_equal(st_facts_read(fx->path, &back, &d), ST_OK);
    assert_int_equal(d.count, 0);
    assert_string_equal(back.sha256, facts.sha256);
    assert_int_equal(back.n, 2);
    for (size_t l = 0; l < 2; l++) {
        const st_facts_layer *x = &facts.layers[l], *y = &back.layers[l];
        assert_string_equal(x->spec, y->spec);
        assert_string_equal(x->file, y->file);
        assert_string_equal(x->format, y->format);
        assert_string_equal(x->name, y->name);
        assert_string_equal(x->crs, y->crs);
        assert_int_equal(x->size, y->size);
        assert_int_equal(x->mtime_s, y->mtime_s);
        assert_int_equal(x->mtime_ns, y->mtime_ns);
        assert_int_equal(x->dense, y->dense);
        assert_int_equal(x->fid_min, y->fid_min);
        assert_int_equal(x->ncoordless, y->ncoordless);
        assert_memory_equal(x->coordless, y->coordless, x->ncoordless * sizeof *x->coordless);
        assert_true(st_facts_same_content(x, y));
        assert_true(x->extent.xmin == y->extent.xmin && x->extent.ymax == y->extent.ymax);
    }
    /* a different extent, count or flag is other content */
    back.layers[0].extent.xmax += 1e-9;
    assert_false(st_facts_same_content(&facts.layers[0], &back.layers[0]));
    back.layers[0].extent = facts.layers[0].extent;
    back.layers[0].text[1] = 1;
    assert_false(st_facts_same_content(&facts.layers[0], &back.layers[0]));
    st_facts_free(&back);
    st_facts_free(&facts);
    st_facts_free(NULL);
    st_diags_free(&d);
}

static char *slurp(const char *path)
{
    FILE *f = fopen(path, "rb");
    assert_non_null(f);
    char *s = calloc(1, 1 << 16);
    size_t n = fread(s, 1, (1 << 16) - 1, f);
    fclose(f);
    s[n] = '\0';
    return s;
}

/* Write body (with a right digest when 'digest', else as it is). */
static void put(const char *path, const char *body, int digest)
{
    FILE *f = fopen(path, "wb");
    assert_non_null(f);
    fputs(body, f);
    if (digest) {
        char hex[65];
        st_sha256_hex(body, strlen(body), hex);
        fprintf(f, "sha256 %s\n", hex);
    }
    fclose(f);
}

/* The file's text with the first 'from' replaced by 'to', the digest
** line dropped (put() writes a right one again). */
static char *edited(const char *text, const char *from, const char *to)
{
    const char *at = strstr(text, from);
    assert_non_null(at);
    const char *dig = strstr(text, "sha256 ");
    char *out = calloc(1, strlen(text) + strlen(to) + 1);
    memcpy(out, text, (size_t)(at - text));
    strcat(out, to);
    strncat(out, at + strlen(from), (size_t)(dig - (at + strlen(from))));
    return out;
}

static void expect_refused(const char *path, const char *words)
{
    st_facts back;
    st_diags d;
    st_diags_init(&d);
    st_status rc = st_facts_read(path, &back, &d);
    if (rc != ST_ERR_FORMAT || d.count != 1 || !strstr(d.items[0].message, words))
        fail_msg("expected '%s' refused for '%s', got %d: %s", path, words, rc,
                 d.count ? d.items[0].message : "nothing");
    assert_string_equal(d.items[0].file, path);
    assert_null(back.layers);
    st_diags_free(&d);
}

static void test_damage_refused(void **state)
{
    fixture *fx = *state;
    st_facts facts;
    make_facts(&facts);
    st_diags d;
    st_diags_init(&d);
    assert_int_equal(st_facts_write(&facts, fx->path, &d), ST_OK);
    st_facts_free(&facts);
    char *good = slurp(fx->path);
    char bad[160];
    snprintf(bad, sizeof bad, "%s/bad.txt", fx->dir);

    /* a value changed, the digest left: refused by the digest */
    char *t = edited(good, "count 40", "count 41");
    char *withdig = calloc(1, strlen(good) + 8);
    strcpy(withdig, t);
    strcat(withdig, strstr(good, "sha256 "));
    put(bad, withdig, 0);
    expect_refused(bad, "digest does not match");
    free(withdig);
    free(t);
    /* cut short: before the digest, inside a line */
    t = edited(good, "end\nsha", "sha");
    *strstr(t, "sha") = '\0';
    put(bad, t, 0);
    expect_refused(bad, "ends early");
    free(t);
    char *cut = strdup(good);
    cut[strlen(cut) - 5] = '\0';
    put(bad, cut, 0);
    expect_refused(bad, "cut short");
    free(cut);
    /* damage with a right digest: each refused for what it is */
    static const char *const cases[][3] = {
        {"stocktake-facts 1", "stocktake-facts 2", "unknown version"},
        {"layers 2", "layers 3", "expected a line layer"},
        {"count 40", "count -1", "bad number"},
        {"count 40", "count 4x", "bad number"},
        {"fields 2 10", "fields 2 1", "do not match the field count"},
        {"fields 2 10", "fields 2 12", "do not match the field count"},
        {"fids dense 7", "fids sparse 7", "expected 'none' or 'dense FID'"},
        {"coordless 1 3", "coordless 2 3 3", "must rise"},
        {"coordless 1 3", "coordless 1 40", "must rise and lie below"},
        {"coordless 1 3", "coordless 1 3 4", "more positions"},
        {"coordless 1 3", "coordless 41", "bad count"},
        {"extent 1 ", "extent 2 ", "bad values"},
        {"extent 1 ", "extent 1 nan ", "bad values"},
        {"spec a%20b%25.gpkg:layer", "spec a%2", "bad %XX escape"},
        {"spec a%20b%25.gpkg:layer", "spec a%00b", "bad %XX escape"},
        {"spec a%20b%25.gpkg:layer", "spec a\tb", "unencoded byte"},
        {"mtime 1700000000 123456789", "mtime 1700000000 1234567890", "bad time"},
        {"size 1234\n", "", "expected a line size"},
        {"crs EPSG:4326\n", "", "expected a line crs"},
        {"end\n", "end\nextra\n", "expected a line"},
    };
    for (size_t i = 0; i < sizeof cases / sizeof cases[0]; i++) {
        t = edited(good, cases[i][0], cases[i][1]);
        put(bad, t, 1);
        expect_refused(bad, cases[i][2]);
        free(t);
    }
    /* text after the digest */
    char *tail = calloc(1, strlen(good) + 8);
    strcpy(tail, good);
    strcat(tail, "more\n");
    put(bad, tail, 0);
    expect_refused(bad, "text after the digest");
    free(tail);
    /* not there at all: ST_ERR_IO naming it */
    st_facts back;
    snprintf(bad, sizeof bad, "%s/none.txt", fx->dir);
    assert_int_equal(st_facts_read(bad, &back, &d), ST_ERR_IO);
    assert_string_equal(d.items[d.count - 1].file, bad);
    st_diags_free(&d);
    free(good);
}

static void test_write_fails_cleanly(void **state)
{
    fixture *fx = *state;
    st_facts facts;
    make_facts(&facts);
    char path[192];
    snprintf(path, sizeof path, "%s/no/such/folder/facts.txt", fx->dir);
    st_diags d;
    st_diags_init(&d);
    assert_int_equal(st_facts_write(&facts, path, &d), ST_ERR_IO);
    assert_int_equal(d.count, 1);
    assert_string_equal(d.items[0].file, path);
    st_diags_free(&d);
    st_facts_free(&facts);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_scan),
        cmocka_unit_test_setup_teardown(test_round_trip, setup, teardown),
        cmocka_unit_test_setup_teardown(test_damage_refused, setup, teardown),
        cmocka_unit_test_setup_teardown(test_write_fails_cleanly, setup, teardown),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
