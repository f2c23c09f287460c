/*
** tests/unit/test_feature_pack.c -- the compact forms of a feature held by
** the million (docs/performance.md, memory per footprint):
** st_feature_pack_values: the source attributes moved into one block read
** exactly as before (missing values stay missing, empty strings stay
** empty), setting a value afterwards unpacks first; st_geom_pack: the
** geometry's three arrays in one block read the same, the builder unpacks
** before it adds; schema values that borrow their text are not freed with
** the feature, owned ones are; the record's size. Freeing frees everything
** (this suite runs under ASan and valgrind); a failed allocation changes
** nothing.
*/
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <cmocka.h>

#include <string.h>

#include "stocktake/core.h"
#include "stocktake/feature.h"

static const char *const sample[] = {"way/1000652", NULL, "", "casa adosada", "R+2"};
#define NSAMPLE (sizeof sample / sizeof sample[0])

static st_feature *filled(void)
{
    st_feature *f = st_feature_new();
    assert_non_null(f);
    for (uint32_t i = 0; i < NSAMPLE; i++)
        assert_int_equal(st_feature_set_value(f, i, sample[i],
                                              sample[i] ? strlen(sample[i]) : 0), ST_OK);
    return f;
}

static void expect_sample(const st_feature *f)
{
    assert_int_equal(f->nvalues, NSAMPLE);
    for (uint32_t i = 0; i < NSAMPLE; i++) {
        if (!sample[i])
            assert_null(st_feature_value(f, i));
        else
            assert_string_equal(st_feature_value(f, i), sample[i]);
    }
    assert_null(st_feature_value(f, NSAMPLE));
    assert_int_equal(st_feature_filled(f), 3);
}

static void test_pack_reads_the_same(void **state)
{
    (void)state;
    st_feature *f = filled();
    assert_int_equal(st_feature_pack_values(f), ST_OK);
    assert_true(f->values_packed > 0);
    /* the strings lie inside the block, after the pointer array */
    const char *block = (const char *)f->values;
    assert_true(f->values[0] >= block + NSAMPLE * sizeof(char *));
    assert_true(f->values[4] < block + f->values_packed);
    expect_sample(f);
    assert_int_equal(st_feature_pack_values(f), ST_OK);   /* twice: no-op */
    expect_sample(f);
    st_feature_free(f);
}

static void test_set_after_pack_unpacks(void **state)
{
    (void)state;
    st_feature *f = filled();
    assert_int_equal(st_feature_pack_values(f), ST_OK);
    assert_int_equal(st_feature_set_value(f, 1, "2 pisos", 7), ST_OK);
    assert_int_equal(f->values_packed, 0);
    assert_string_equal(st_feature_value(f, 1), "2 pisos");
    assert_string_equal(st_feature_value(f, 3), "casa adosada");
    assert_int_equal(st_feature_set_value(f, 7, "x", 1), ST_OK);   /* grows */
    assert_int_equal(f->nvalues, 8);
    st_feature_free(f);
}

static void test_pack_empty_feature(void **state)
{
    (void)state;
    st_feature *f = st_feature_new();
    assert_non_null(f);
    assert_int_equal(st_feature_pack_values(f), ST_OK);
    assert_int_equal(f->values_packed, 0);
    st_feature_free(f);
}

static void test_pack_nomem_changes_nothing(void **state)
{
    (void)state;
    st_feature *f = filled();
    char **before = f->values;
    st_alloc_fail_after(1);
    assert_int_equal(st_feature_pack_values(f), ST_ERR_NOMEM);
    st_alloc_fail_after(0);
    assert_ptr_equal(f->values, before);
    assert_int_equal(f->values_packed, 0);
    expect_sample(f);
    /* unpacking can fail too, and then the packed values are kept */
    assert_int_equal(st_feature_pack_values(f), ST_OK);
    st_alloc_fail_after(1);
    assert_int_equal(st_feature_set_value(f, 0, "y", 1), ST_ERR_NOMEM);
    st_alloc_fail_after(0);
    assert_true(f->values_packed > 0);
    expect_sample(f);
    st_feature_free(f);
}

/* Two parts, the first with a hole: 3 rings, 14 vertices. */
static void two_parts(st_geom *g)
{
    static const double ring[3][5][2] = {
        {{0, 0}, {10, 0}, {10, 10}, {0, 10}, {0, 0}},
        {{2, 2}, {2, 4}, {4, 4}, {4, 2}, {2, 2}},
        {{20, 0}, {21, 0}, {21, 1}, {20, 0}, {20, 0}},
    };
    g->type = ST_GEOM_MULTIPOLYGON;
    for (int r = 0; r < 3; r++) {
        if (r != 1)
            assert_int_equal(st_geom_begin_part(g), ST_OK);
        assert_int_equal(st_geom_begin_ring(g), ST_OK);
        for (int v = 0; v < (r == 2 ? 4 : 5); v++)
            assert_int_equal(st_geom_add_xy(g, ring[r][v][0], ring[r][v][1]), ST_OK);
    }
}

static void expect_same_geom(const st_geom *a, const st_geom *b)
{
    assert_int_equal(a->type, b->type);
    assert_int_equal(a->nparts, b->nparts);
    assert_int_equal(a->nrings, b->nrings);
    assert_int_equal(a->ncoords, b->ncoords);
    assert_memory_equal(a->part_ring, b->part_ring, (a->nparts + 1) * sizeof(uint32_t));
    assert_memory_equal(a->ring_coord, b->ring_coord, (a->nrings + 1) * sizeof(uint32_t));
    assert_memory_equal(a->xy, b->xy, 2 * (size_t)a->ncoords * sizeof(double));
}

static void test_geom_pack_reads_the_same(void **state)
{
    (void)state;
    st_geom g, want;
    st_geom_init(&g);
    st_geom_init(&want);
    two_parts(&g);
    two_parts(&want);
    assert_int_equal(g.ncoords, 14);
    assert_int_equal(st_geom_pack(&g), ST_OK);
    assert_int_equal(g.packed, 1);
    /* one block: the offsets follow the coordinates */
    assert_ptr_equal((const void *)g.part_ring, (const void *)(g.xy + 2 * 14));
    assert_ptr_equal((const void *)g.ring_coord, (const void *)(g.part_ring + 3));
    expect_same_geom(&g, &want);
    assert_int_equal(st_geom_pack(&g), ST_OK);   /* twice: no-op */
    expect_same_geom(&g, &want);
    st_geom_clear(&g);
    assert_int_equal(g.packed, 0);
    assert_null(g.xy);
    st_geom_clear(&want);
}

static void test_geom_add_after_pack_unpacks(void **state)
{
    (void)state;
    st_geom g, want;
    st_geom_init(&g);
    st_geom_init(&want);
    two_parts(&g);
    two_parts(&want);
    assert_int_equal(st_geom_pack(&g), ST_OK);
    assert_int_equal(st_geom_add_xy(&g, 20, 0), ST_OK);
    assert_int_equal(st_geom_add_xy(&want, 20, 0), ST_OK);
    assert_int_equal(g.packed, 0);
    expect_same_geom(&g, &want);
    assert_int_equal(st_geom_pack(&g), ST_OK);
    assert_int_equal(st_geom_begin_part(&g), ST_OK);
    assert_int_equal(st_geom_begin_part(&want), ST_OK);
    expect_same_geom(&g, &want);
    st_geom_clear(&g);
    st_geom_clear(&want);
}

static void test_geom_pack_empty_and_nomem(void **state)
{
    (void)state;
    st_geom g;
    st_geom_init(&g);
    assert_int_equal(st_geom_pack(&g), ST_OK);   /* nothing to pack */
    assert_int_equal(g.packed, 0);
    two_parts(&g);
    double *xy = g.xy;
    st_alloc_fail_after(1);
    assert_int_equal(st_geom_pack(&g), ST_ERR_NOMEM);
    st_alloc_fail_after(0);
    assert_int_equal(g.packed, 0);
    assert_ptr_equal(g.xy, xy);
    /* unpacking can fail too, and then the packed geometry is kept */
    assert_int_equal(st_geom_pack(&g), ST_OK);
    st_alloc_fail_after(1);
    assert_int_equal(st_geom_add_xy(&g, 1, 1), ST_ERR_NOMEM);
    st_alloc_fail_after(0);
    assert_int_equal(g.packed, 1);
    assert_int_equal(g.ncoords, 14);
    st_geom_clear(&g);
}

/* A feature whose first value borrows a string of the caller and whose
** second owns a copy: freeing the feature frees the copy only (a free of
** the borrowed one would be an error under ASan and valgrind). */
static void test_schema_borrowed_and_owned(void **state)
{
    (void)state;
    static const char code[] = "RES";
    st_feature *f = st_feature_new();
    assert_non_null(f);
    f->schema = st_calloc(2, sizeof *f->schema);
    assert_non_null(f->schema);
    f->nschema = 2;
    st_field_value_borrow(&f->schema[0], code);
    assert_ptr_equal(f->schema[0].text, code);
    assert_int_equal(f->schema[0].borrowed, 1);
    char *owned = st_strdup("12.5");
    assert_non_null(owned);
    st_field_value_take(&f->schema[1], owned);
    assert_int_equal(f->schema[1].borrowed, 0);
    /* replacing a borrowed text by an owned one and back */
    st_field_value_take(&f->schema[0], st_strdup("URM"));
    assert_string_equal(f->schema[0].text, "URM");
    assert_int_equal(f->schema[0].borrowed, 0);
    st_field_value_borrow(&f->schema[0], code);
    assert_ptr_equal(f->schema[0].text, code);
    st_feature_free(f);
}

/* The record held once per footprint stays within one 176-byte heap block
** on 64-bit machines. */
static void test_record_size(void **state)
{
    (void)state;
    if (sizeof(void *) == 8) {
        assert_true(sizeof(st_geom) <= 56);
        assert_true(sizeof(st_feature) <= 168);
    }
    assert_true(sizeof(st_field_value) <= 3 * sizeof(void *));
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_pack_reads_the_same),
        cmocka_unit_test(test_set_after_pack_unpacks),
        cmocka_unit_test(test_pack_empty_feature),
        cmocka_unit_test(test_pack_nomem_changes_nothing),
        cmocka_unit_test(test_geom_pack_reads_the_same),
        cmocka_unit_test(test_geom_add_after_pack_unpacks),
        cmocka_unit_test(test_geom_pack_empty_and_nomem),
        cmocka_unit_test(test_schema_borrowed_and_owned),
        cmocka_unit_test(test_record_size),
    };
    return cmocka_run_group_tests_name("feature_pack", tests, NULL, NULL);
}
