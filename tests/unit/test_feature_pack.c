/*
** tests/unit/test_feature_pack.c -- st_feature_pack_values: the source
** attributes moved into one block read exactly as before (missing values
** stay missing, empty strings stay empty), setting a value afterwards
** unpacks first, and freeing a packed feature frees everything (this
** suite runs under ASan and valgrind); a failed allocation changes nothing.
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

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_pack_reads_the_same),
        cmocka_unit_test(test_set_after_pack_unpacks),
        cmocka_unit_test(test_pack_empty_feature),
        cmocka_unit_test(test_pack_nomem_changes_nothing),
    };
    return cmocka_run_group_tests_name("feature_pack", tests, NULL, NULL);
}
