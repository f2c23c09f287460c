/*
** tests/unit/test_core.c -- allocation hook, buffers, diagnostics rendering,
** UTF-8 validation, the geometry builder and ring orientation, and the
** st_geom <-> GEOS bridge.
*/
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <stdio.h>
#include <string.h>
#include <cmocka.h>

#include "stocktake/core.h"
#include "stocktake/finding.h"
#include "stocktake/feature.h"
#include "stocktake/geomx.h"

static void test_alloc_hook_fails_nth(void **state)
{
    (void)state;
    st_alloc_fail_after(2);
    void *a = st_malloc(8);
    void *b = st_malloc(8);
    void *c = st_malloc(8);
    st_alloc_fail_after(0);
    assert_non_null(a);
    assert_null(b);
    assert_non_null(c);
    st_free(a);
    st_free(c);
}

static void test_buf_limit(void **state)
{
    (void)state;
    st_buf b;
    st_buf_init(&b, 5);
    assert_int_equal(st_buf_puts(&b, "abc"), ST_OK);
    assert_int_equal(st_buf_puts(&b, "def"), ST_ERR_LIMIT);
    assert_string_equal(b.data, "abc");
    assert_int_equal(st_buf_printf(&b, "%d", 12), ST_OK);
    assert_string_equal(b.data, "abc12");
    char *t = st_buf_take(&b);
    assert_string_equal(t, "abc12");
    assert_null(b.data);
    st_free(t);
}

static void test_diag_render_rule_caret(void **state)
{
    (void)state;
    st_diags d;
    st_diags_init(&d);
    st_loc loc = ST_LOC_LINE("demo.rules", 12, 7, 6);
    assert_int_equal(st_diags_add(&d, ST_SEV_ERROR, ST_ERR_RULE, &loc,
                                  "unknown field '%s'", "storys"),
                     ST_ERR_RULE);
    st_diags_set_excerpt(&d, "  set storys 2", 14);
    st_buf b;
    st_buf_init(&b, 0);
    assert_int_equal(st_diag_render(&d.items[0], &b), ST_OK);
    assert_string_equal(b.data, "demo.rules:12:7: error: unknown field 'storys'\n"
                                "    set storys 2\n"
                                "        ^~~~~~\n");
    assert_int_equal(d.errors, 1);
    st_buf_free(&b);
    st_diags_free(&d);
}

static void test_diag_render_feature(void **state)
{
    (void)state;
    st_diags d;
    st_diags_init(&d);
    st_loc loc = ST_LOC_FEATURE("roads.shp", 1042);
    st_diags_add(&d, ST_SEV_WARNING, ST_ERR_FORMAT, &loc, "ring is not closed");
    st_buf b;
    st_buf_init(&b, 0);
    assert_int_equal(st_diag_render(&d.items[0], &b), ST_OK);
    assert_string_equal(b.data, "roads.shp: feature 1042: warning: ring is not closed\n");
    st_buf_free(&b);
    st_diags_free(&d);
}

static void test_diags_cap_counts_rest(void **state)
{
    (void)state;
    st_diags d;
    st_diags_init(&d);
    d.max_items = 3;
    for (int i = 0; i < 10; i++)
        st_diags_add(&d, ST_SEV_ERROR, ST_ERR_FORMAT, NULL, "bad %d", i);
    assert_int_equal(d.count, 3);
    assert_int_equal(d.dropped, 7);
    assert_int_equal(d.errors, 10);
    st_diags_free(&d);
}

static void test_utf8(void **state)
{
    (void)state;
    assert_int_equal(st_utf8_valid_prefix("Z\xC3\xBCrich", 7), 7);
    assert_int_equal(st_utf8_valid_prefix("a\xC3", 2), 1);       /* truncated */
    assert_int_equal(st_utf8_valid_prefix("\xC0\xAF", 2), 0);    /* overlong */
    assert_int_equal(st_utf8_valid_prefix("\xED\xA0\x80", 3), 0);/* surrogate */
    char *s = st_utf8_sanitize("a\xFF" "b", 3);
    assert_string_equal(s, "a\xEF\xBF\xBD" "b");
    st_free(s);
}

/* A 10 x 10 square with a 2 x 2 hole, both wound clockwise. */
static void build_square_with_hole(st_geom *g)
{
    st_geom_init(g);
    g->type = ST_GEOM_POLYGON;
    static const double shell[] = {0, 0, 0, 10, 10, 10, 10, 0, 0, 0};
    static const double hole[] = {4, 4, 4, 6, 6, 6, 6, 4, 4, 4};
    assert_int_equal(st_geom_begin_part(g), ST_OK);
    assert_int_equal(st_geom_begin_ring(g), ST_OK);
    for (int i = 0; i < 5; i++)
        assert_int_equal(st_geom_add_xy(g, shell[2 * i], shell[2 * i + 1]), ST_OK);
    assert_int_equal(st_geom_begin_ring(g), ST_OK);
    for (int i = 0; i < 5; i++)
        assert_int_equal(st_geom_add_xy(g, hole[2 * i], hole[2 * i + 1]), ST_OK);
}

static void test_geom_builder_and_orient(void **state)
{
    (void)state;
    st_geom g;
    build_square_with_hole(&g);
    assert_int_equal(g.nparts, 1);
    assert_int_equal(g.nrings, 2);
    assert_int_equal(g.ncoords, 10);
    assert_int_equal(g.part_ring[1], 2);
    assert_int_equal(g.ring_coord[1], 5);
    assert_true(st_geom_ring_signed_area(&g, 0) < 0);   /* clockwise */
    st_geom_orient(&g, 1);                              /* RFC 7946 */
    assert_true(st_geom_ring_signed_area(&g, 0) == 100.0);
    assert_true(st_geom_ring_signed_area(&g, 1) == -4.0);
    st_geom_orient(&g, 0);                              /* Shapefile */
    assert_true(st_geom_ring_signed_area(&g, 0) == -100.0);
    assert_true(st_geom_ring_signed_area(&g, 1) == 4.0);
    double bb[4];
    assert_true(st_geom_bbox(&g, bb));
    assert_true(bb[0] == 0 && bb[1] == 0 && bb[2] == 10 && bb[3] == 10);
    st_geom copy;
    st_geom_init(&copy);
    assert_int_equal(st_geom_copy(&copy, &g), ST_OK);
    assert_int_equal(copy.ncoords, 10);
    assert_memory_equal(copy.xy, g.xy, 20 * sizeof(double));
    st_geom_clear(&copy);
    st_geom_clear(&g);
}

/* A multipolygon of empty polygons: parts but no rings nor coordinates
** (the builder has made no ring array); its copy is the same shape. */
static void test_geom_copy_parts_without_rings(void **state)
{
    (void)state;
    st_geom g, copy;
    st_geom_init(&g);
    st_geom_init(&copy);
    g.type = ST_GEOM_MULTIPOLYGON;
    assert_int_equal(st_geom_begin_part(&g), ST_OK);
    assert_int_equal(g.nparts, 1);
    assert_int_equal(g.nrings, 0);
    assert_int_equal(st_geom_copy(&copy, &g), ST_OK);
    assert_int_equal(copy.type, ST_GEOM_MULTIPOLYGON);
    assert_int_equal(copy.nparts, 1);
    assert_int_equal(copy.nrings, 0);
    assert_int_equal(copy.ncoords, 0);
    assert_int_equal(copy.part_ring[0], 0);
    assert_int_equal(copy.ring_coord[0], 0);
    assert_true(st_geom_is_empty(&copy));
    st_geom_clear(&copy);
    st_geom_clear(&g);
}

static void test_geos_roundtrip_wkb(void **state)
{
    (void)state;
    st_geos *gx = st_geos_new();
    assert_non_null(gx);
    st_geom g;
    build_square_with_hole(&g);
    char err[256] = "";
    GEOSGeometry *geom = st_geom_to_geos(gx, &g, err, sizeof err);
    assert_non_null(geom);
    double area = 0;
    assert_int_equal(GEOSArea_r(gx->h, geom, &area), 1);
    assert_true(area == 96.0);
    GEOSGeom_destroy_r(gx->h, geom);

    unsigned char *wkb = NULL;
    size_t n = 0;
    assert_int_equal(st_geom_to_wkb(gx, &g, &wkb, &n, err, sizeof err), ST_OK);
    /* 1 + 4 + 4 rings count + 2 * (4 + 5 * 16) */
    assert_int_equal(n, 1 + 4 + 4 + 2 * (4 + 5 * 16));
    st_geom back;
    st_geom_init(&back);
    assert_int_equal(st_geom_from_wkb(gx, wkb, n, &back, err, sizeof err), ST_OK);
    assert_int_equal(back.type, ST_GEOM_POLYGON);
    assert_int_equal(back.nrings, 2);
    assert_memory_equal(back.xy, g.xy, 20 * sizeof(double));
    GEOSFree_r(gx->h, wkb);

    st_buf wkt;
    st_buf_init(&wkt, 0);
    assert_int_equal(st_geom_to_wkt(gx, &g, &wkt), ST_OK);
    assert_string_equal(wkt.data, "POLYGON ((0 0, 0 10, 10 10, 10 0, 0 0), (4 4, 4 6, 6 6, 6 4, 4 4))");
    st_buf_free(&wkt);
    st_geom_clear(&back);
    st_geom_clear(&g);
    st_geos_free(gx);
}

static void test_geos_rejects_unclosed_ring(void **state)
{
    (void)state;
    st_geos *gx = st_geos_new();
    st_geom g;
    st_geom_init(&g);
    g.type = ST_GEOM_POLYGON;
    assert_int_equal(st_geom_add_xy(&g, 0, 0), ST_OK);
    assert_int_equal(st_geom_add_xy(&g, 1, 0), ST_OK);
    assert_int_equal(st_geom_add_xy(&g, 1, 1), ST_OK);
    assert_int_equal(st_geom_add_xy(&g, 0, 1), ST_OK);
    char err[256] = "";
    assert_null(st_geom_to_geos(gx, &g, err, sizeof err));
    assert_non_null(strstr(err, "closed"));
    assert_int_equal(gx->last_status, ST_ERR_GEOS);   /* the ring, not memory */
    st_geom_clear(&g);
    st_geos_free(gx);
}

static void test_feature_values(void **state)
{
    (void)state;
    st_feature *f = st_feature_new();
    assert_non_null(f);
    assert_int_equal(f->district, -1);
    assert_int_equal(st_feature_set_value(f, 3, "house", 5), ST_OK);
    assert_int_equal(f->nvalues, 4);
    assert_null(st_feature_value(f, 0));
    assert_string_equal(st_feature_value(f, 3), "house");
    assert_null(st_feature_value(f, 9));
    assert_int_equal(st_feature_set_value(f, 1, "", 0), ST_OK);
    assert_int_equal(st_feature_filled(f), 1);   /* "" does not count */
    st_feature_free(f);
    st_feature_free(NULL);
}

static void test_fields_dedupe(void **state)
{
    (void)state;
    st_fields fl;
    st_fields_init(&fl);
    uint32_t a, b, c;
    assert_int_equal(st_fields_add(&fl, "building", ST_FIELD_TEXT, 0, 0, &a), ST_OK);
    assert_int_equal(st_fields_add(&fl, "height", ST_FIELD_REAL, 0, 0, &b), ST_OK);
    assert_int_equal(st_fields_add(&fl, "building", ST_FIELD_TEXT, 0, 0, &c), ST_OK);
    assert_int_equal(a, 0);
    assert_int_equal(b, 1);
    assert_int_equal(c, 0);
    assert_int_equal(fl.count, 2);
    assert_int_equal(st_fields_find(&fl, "height"), 1);
    assert_int_equal(st_fields_find(&fl, "levels"), -1);
    st_fields_free(&fl);
}

/* Every allocation in the builder may fail; each failure is reported and
** nothing leaks (run under ASan / valgrind). */
static void test_geom_builder_nomem_loop(void **state)
{
    (void)state;
    for (long n = 1; n < 40; n++) {
        st_geom g;
        st_geom_init(&g);
        g.type = ST_GEOM_POLYGON;
        st_alloc_fail_after(n);
        st_status rc = ST_OK;
        for (int i = 0; i < 20 && rc == ST_OK; i++)
            rc = st_geom_add_xy(&g, i, i);
        long used = st_alloc_count();
        st_alloc_fail_after(0);
        st_geom_clear(&g);
        if (rc == ST_OK) {
            assert_true(used < n);
            break;
        }
        assert_int_equal(rc, ST_ERR_NOMEM);
    }
}

/* A failed allocation inside the bridge is told apart from a bad ring. */
static void test_geos_bridge_reports_nomem(void **state)
{
    (void)state;
    st_geos *gx = st_geos_new();
    st_geom g;
    build_square_with_hole(&g);
    char err[256] = "";
    st_alloc_fail_after(1);
    GEOSGeometry *geom = st_geom_to_geos(gx, &g, err, sizeof err);
    st_alloc_fail_after(0);
    assert_null(geom);
    assert_int_equal(gx->last_status, ST_ERR_NOMEM);
    geom = st_geom_to_geos(gx, &g, err, sizeof err);
    assert_non_null(geom);
    assert_int_equal(gx->last_status, ST_OK);
    GEOSGeom_destroy_r(gx->h, geom);
    st_geom_clear(&g);
    st_geos_free(gx);
}

/* st_geom_reset empties a geometry and keeps its arrays: building it
** again up to the same size allocates nothing. */
static void test_geom_reset_keeps_memory(void **state)
{
    (void)state;
    st_geom g;
    st_geom_init(&g);
    g.type = ST_GEOM_POLYGON;
    for (int i = 0; i < 4; i++)
        assert_int_equal(st_geom_add_xy(&g, i, i * i), ST_OK);
    st_geom_reset(&g);
    assert_int_equal(g.type, ST_GEOM_NULL);
    assert_int_equal(g.ncoords, 0);
    assert_true(st_geom_is_empty(&g));
    st_alloc_fail_after(1);   /* any allocation would fail */
    g.type = ST_GEOM_POINT;
    st_status rc = st_geom_add_xy(&g, 7.5, 47.25);
    long used = st_alloc_count();
    st_alloc_fail_after(0);
    assert_int_equal(rc, ST_OK);
    assert_int_equal(used, 0);
    assert_int_equal(g.ncoords, 1);
    assert_int_equal(g.nparts, 1);
    assert_int_equal(g.nrings, 1);
    assert_true(g.xy[0] == 7.5 && g.xy[1] == 47.25);
    assert_int_equal(g.ring_coord[0], 0);
    assert_int_equal(g.ring_coord[1], 1);
    st_geom_clear(&g);
}

/* ---- findings: replace a run of one list with another ------------------- */

static void add_n(st_findings *l, uint64_t bid, const char *tag, int n)
{
    for (int i = 0; i < n; i++)
        assert_int_equal(st_findings_add(l, bid, "t.code", ST_SEV_NOTE, 0, 0, "%s%d", tag, i), ST_OK);
}

/* The messages of l joined by spaces. */
static void assert_messages(const st_findings *l, const char *want)
{
    char got[512] = "";
    for (size_t i = 0; i < l->count; i++)
        snprintf(got + strlen(got), sizeof got - strlen(got), "%s%s", i ? " " : "",
                 l->items[i].message);
    assert_string_equal(got, want);
}

static void test_findings_replace(void **state)
{
    (void)state;
    st_findings l, r;
    st_findings_init(&l);
    st_findings_init(&r);
    add_n(&l, 1, "a", 2);
    add_n(&l, 2, "b", 2);
    add_n(&l, 3, "c", 1);
    add_n(&r, 2, "x", 3);
    assert_int_equal(st_findings_replace(&l, 2, 2, &r), ST_OK);   /* grows */
    assert_int_equal(r.count, 0);
    assert_messages(&l, "a0 a1 x0 x1 x2 c0");
    assert_int_equal(l.items[4].bid, 2);
    assert_int_equal(l.items[5].bid, 3);
    assert_int_equal(st_findings_replace(&l, 2, 3, &r), ST_OK);   /* removes */
    assert_messages(&l, "a0 a1 c0");
    add_n(&r, 9, "z", 1);
    assert_int_equal(st_findings_replace(&l, 3, 0, &r), ST_OK);   /* appends */
    assert_messages(&l, "a0 a1 c0 z0");
    assert_int_equal(st_findings_replace(&l, 4, 1, &r), ST_ERR_USAGE);
    /* no memory to grow: both lists as they were */
    add_n(&r, 5, "y", 40);
    for (long n = 1;; n++) {
        st_alloc_fail_after(n);
        st_status rc = st_findings_replace(&l, 0, 1, &r);
        st_alloc_fail_after(0);
        if (rc == ST_OK)
            break;
        assert_int_equal(rc, ST_ERR_NOMEM);
        assert_messages(&l, "a0 a1 c0 z0");
        assert_int_equal(r.count, 40);
    }
    assert_int_equal(l.count, 43);
    assert_string_equal(l.items[0].message, "y0");
    assert_string_equal(l.items[40].message, "a1");
    st_findings_free(&l);
    st_findings_free(&r);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_alloc_hook_fails_nth),
        cmocka_unit_test(test_buf_limit),
        cmocka_unit_test(test_diag_render_rule_caret),
        cmocka_unit_test(test_diag_render_feature),
        cmocka_unit_test(test_diags_cap_counts_rest),
        cmocka_unit_test(test_utf8),
        cmocka_unit_test(test_geom_builder_and_orient),
        cmocka_unit_test(test_geom_copy_parts_without_rings),
        cmocka_unit_test(test_geos_roundtrip_wkb),
        cmocka_unit_test(test_geos_rejects_unclosed_ring),
        cmocka_unit_test(test_geos_bridge_reports_nomem),
        cmocka_unit_test(test_feature_values),
        cmocka_unit_test(test_fields_dedupe),
        cmocka_unit_test(test_geom_builder_nomem_loop),
        cmocka_unit_test(test_geom_reset_keeps_memory),
        cmocka_unit_test(test_findings_replace),
    };
    return cmocka_run_group_tests_name("core", tests, NULL, NULL);
}
