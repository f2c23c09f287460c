/*
** tests/unit/test_guard.c -- the checks a run makes before and while it
** reads (pipeline/guard.c): no output over an input (the output itself, a
** sibling file, a GeoPackage named with :layer), the memory estimate from
** file sizes and per feature against --max-memory, the default limit, and
** allocation failures.
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

#include "pipeline/guardInt.h"
#include "stocktake/core.h"
#include "stocktake/feature.h"
#include "scratch.h"

static char tmpdir[256];

static const char *path_of(const char *name)
{
    static char p[4][512];
    static int k;
    char *s = p[k++ & 3];
    snprintf(s, 512, "%s/%s", tmpdir, name);
    return s;
}

/* A file of 'size' bytes (sparse). */
static const char *make_file(const char *name, long size)
{
    const char *p = path_of(name);
    FILE *fp = fopen(p, "wb");
    assert_non_null(fp);
    fclose(fp);
    assert_int_equal(truncate(p, size), 0);
    return p;
}

/* st_run_guard_start on one input; the diagnostics are returned in 'd'. */
static st_status start(const char *input, const char *output, uint64_t limit, st_diags *d)
{
    const char *inputs[1] = {input};
    st_run_options opt;
    memset(&opt, 0, sizeof opt);
    opt.inputs = inputs;
    opt.ninputs = 1;
    opt.output = output;
    opt.max_memory = limit;
    st_memory_budget b;
    st_diags_init(d);
    return st_run_guard_start(&opt, d, &b);
}

static int diag_says(const st_diags *d, const char *file_part, const char *text)
{
    for (size_t i = 0; i < d->count; i++)
        if ((!file_part || (d->items[i].file && strstr(d->items[i].file, file_part))) &&
            strstr(d->items[i].message, text))
            return 1;
    return 0;
}

static void test_output_over_input(void **state)
{
    (void)state;
    st_diags d;
    const char *in = make_file("a.geojson", 100);
    assert_int_equal(start(in, in, 0, &d), ST_ERR_USAGE);
    assert_true(diag_says(&d, "a.geojson", "over this input"));
    st_diags_free(&d);

    char dotted[600];   /* the same file by another path */
    snprintf(dotted, sizeof dotted, "%s/./a.geojson", tmpdir);
    assert_int_equal(start(in, dotted, 0, &d), ST_ERR_USAGE);
    st_diags_free(&d);

    /* a sibling the run writes: OUT.set_aside.EXT, OUT.run_info.csv */
    const char *aside = make_file("o.set_aside.geojson", 100);
    assert_int_equal(start(aside, path_of("o.geojson"), 0, &d), ST_ERR_USAGE);
    assert_true(diag_says(&d, "o.set_aside.geojson", "o.set_aside.geojson over"));
    st_diags_free(&d);
    const char *info = make_file("p.run_info.csv", 100);
    assert_int_equal(start(info, path_of("p.shp"), 0, &d), ST_ERR_USAGE);
    st_diags_free(&d);

    /* a GeoPackage given as FILE:LAYER */
    make_file("g.gpkg", 4096);
    char spec[600];
    snprintf(spec, sizeof spec, "%s:buildings", path_of("g.gpkg"));
    assert_int_equal(start(spec, path_of("g.gpkg"), 0, &d), ST_ERR_USAGE);
    st_diags_free(&d);

    /* another name is fine */
    assert_int_equal(start(in, path_of("b.geojson"), 0, &d), ST_OK);
    assert_int_equal(d.count, 0);
    st_diags_free(&d);
}

static void test_memory_before_reading(void **state)
{
    (void)state;
    st_diags d;
    /* 64 MiB of libraries + 2 x 8 MiB of GeoJSON = 80 MiB */
    const char *in = make_file("big.geojson", 8L << 20);
    assert_int_equal(start(in, path_of("x.gpkg"), 79u << 20, &d), ST_ERR_LIMIT);
    assert_true(diag_says(&d, NULL, "need about 80 MiB"));
    st_diags_free(&d);
    assert_int_equal(start(in, path_of("x.gpkg"), 81u << 20, &d), ST_OK);
    st_diags_free(&d);

    /* Shapefile: 6 x (.shp + .dbf) = 6 x 3 MiB, plus 64 MiB */
    const char *shp = make_file("s.shp", 1L << 20);
    make_file("s.dbf", 2L << 20);
    assert_int_equal(start(shp, path_of("y.gpkg"), 81u << 20, &d), ST_ERR_LIMIT);
    assert_true(diag_says(&d, NULL, "need about 82 MiB"));
    st_diags_free(&d);

    /* 100 GB (sparse) under the default limit */
    const char *huge = make_file("huge.geojson", 100L << 30);
    assert_int_equal(start(huge, path_of("z.gpkg"), 0, &d), ST_ERR_LIMIT);
    st_diags_free(&d);
    unlink(huge);
}

static void test_memory_while_reading(void **state)
{
    (void)state;
    st_feature *f = st_feature_new();
    assert_non_null(f);
    for (int i = 0; i < 100; i++)
        assert_int_equal(st_geom_add_xy(&f->geom, i, i), ST_OK);
    assert_int_equal(st_feature_set_value(f, 0, "house", 5), ST_OK);
    /* 768 + 64 x 100 vertices + 32 + 2 x 5 bytes of text */
    assert_int_equal(st_run_feature_estimate(f), 768 + 6400 + 32 + 10);
    f->index = 41;
    st_memory_budget b = {(64u << 20) + 20000, 64u << 20};
    st_diags d;
    st_diags_init(&d);
    assert_int_equal(st_run_guard_feature(&b, f, "t.geojson", &d), ST_OK);
    assert_int_equal(st_run_guard_feature(&b, f, "t.geojson", &d), ST_OK);
    assert_int_equal(st_run_guard_feature(&b, f, "t.geojson", &d), ST_ERR_LIMIT);
    assert_int_equal(d.count, 1);
    assert_string_equal(d.items[0].file, "t.geojson");
    assert_int_equal(d.items[0].feature, 41);
    st_diags_free(&d);
    st_feature_free(f);
}

static void test_default_limit(void **state)
{
    (void)state;
    uint64_t m = st_run_default_max_memory();
    long pages = sysconf(_SC_PHYS_PAGES), size = sysconf(_SC_PAGESIZE);
    uint64_t phys = (uint64_t)pages * (uint64_t)size;
    assert_true(m > 0);
    assert_true(m <= (uint64_t)8 << 30);
    assert_true(m <= phys / 4 * 3);
}

/* Every allocation in turn fails: NOMEM or a clean result, never a leak. */
static void test_alloc_failures(void **state)
{
    (void)state;
    const char *in = make_file("n.geojson", 100);
    for (long n = 1; n < 200; n++) {
        st_diags d;
        st_alloc_fail_after(n);
        st_status rc = start(in, in, 0, &d);
        long used = st_alloc_count();
        st_alloc_fail_after(0);
        assert_true(rc == ST_ERR_USAGE || rc == ST_ERR_NOMEM);
        st_diags_free(&d);
        if (used < n && rc == ST_ERR_USAGE)
            break;   /* no allocation left to fail */
    }
}

static int setup(void **state)
{
    (void)state;
    const char *base = getenv("TMPDIR") ? getenv("TMPDIR") : "/tmp";
    snprintf(tmpdir, sizeof tmpdir, "%s/st-guard-XXXXXX", base);
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
        cmocka_unit_test(test_output_over_input),
        cmocka_unit_test(test_memory_before_reading),
        cmocka_unit_test(test_memory_while_reading),
        cmocka_unit_test(test_default_limit),
        cmocka_unit_test(test_alloc_failures),
    };
    return cmocka_run_group_tests(tests, setup, teardown);
}
