/*
** tests/unit/test_strtab.c -- the string table (core/strtab.c): dense ids,
** lookups across growth, embedded NUL bytes, big strings, both limits,
** allocation failures leaving the table intact.
*/
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <stdio.h>
#include <string.h>
#include <cmocka.h>

#include "stocktake/core.h"
#include "stocktake/strtab.h"

static void test_ids_dense_in_first_seen_order(void **state)
{
    (void)state;
    st_strtab *t = st_strtab_new(0, 0);
    assert_non_null(t);
    const char *words[] = {"house", "shop", "house", "", "school", "shop"};
    const uint32_t want[] = {0, 1, 0, 2, 3, 1};
    const int want_added[] = {1, 1, 0, 1, 1, 0};
    for (int i = 0; i < 6; i++) {
        uint32_t id;
        int added;
        assert_int_equal(st_strtab_intern(t, words[i], strlen(words[i]), &id, &added), ST_OK);
        assert_int_equal(id, want[i]);
        assert_int_equal(added, want_added[i]);
    }
    assert_int_equal(st_strtab_count(t), 4);
    size_t n;
    assert_string_equal(st_strtab_get(t, 3, &n), "school");
    assert_int_equal(n, 6);
    assert_string_equal(st_strtab_get(t, 2, NULL), "");
    assert_null(st_strtab_get(t, 4, NULL));
    uint32_t id = 99;
    assert_false(st_strtab_find(t, "hous", 4, &id));
    assert_int_equal(id, 99);
    assert_true(st_strtab_find(t, "shop", 4, &id));
    assert_int_equal(id, 1);
    st_strtab_free(t);
    st_strtab_free(NULL);
}

/* 300,000 distinct keys force many slot-array doublings; each must still
** be found with its own id, and the text pointers must not move. */
static void test_growth_keeps_everything(void **state)
{
    (void)state;
    st_strtab *t = st_strtab_new(0, 0);
    assert_non_null(t);
    char key[32];
    const char *first = NULL;
    for (uint32_t i = 0; i < 300000; i++) {
        int n = snprintf(key, sizeof key, "k%u", i * 7919u);
        uint32_t id;
        assert_int_equal(st_strtab_intern(t, key, (size_t)n, &id, NULL), ST_OK);
        assert_int_equal(id, i);
        if (i == 0)
            first = st_strtab_get(t, 0, NULL);
    }
    assert_ptr_equal(first, st_strtab_get(t, 0, NULL));
    for (uint32_t i = 0; i < 300000; i += 997) {
        int n = snprintf(key, sizeof key, "k%u", i * 7919u);
        uint32_t id;
        assert_true(st_strtab_find(t, key, (size_t)n, &id));
        assert_int_equal(id, i);
    }
    assert_int_equal(st_strtab_count(t), 300000);
    st_strtab_free(t);
}

/* Bytes, not C strings: "a\0b" and "a\0c" and "a" are three keys; a string
** longer than a text block gets its own. */
static void test_binary_and_big(void **state)
{
    (void)state;
    st_strtab *t = st_strtab_new(0, 0);
    uint32_t a, b, c, big, small;
    assert_int_equal(st_strtab_intern(t, "a\0b", 3, &a, NULL), ST_OK);
    assert_int_equal(st_strtab_intern(t, "a\0c", 3, &b, NULL), ST_OK);
    assert_int_equal(st_strtab_intern(t, "a", 1, &c, NULL), ST_OK);
    assert_true(a != b && b != c && a != c);
    static char huge[200000];
    memset(huge, 'x', sizeof huge);
    assert_int_equal(st_strtab_intern(t, huge, sizeof huge, &big, NULL), ST_OK);
    assert_int_equal(st_strtab_intern(t, "after", 5, &small, NULL), ST_OK);
    size_t n;
    assert_memory_equal(st_strtab_get(t, big, &n), huge, sizeof huge);
    assert_int_equal(n, sizeof huge);
    assert_string_equal(st_strtab_get(t, small, NULL), "after");
    assert_memory_equal(st_strtab_get(t, a, NULL), "a\0b", 4);
    st_strtab_free(t);
}

/* Both limits refuse new strings only; known ones are still found. */
static void test_limits(void **state)
{
    (void)state;
    st_strtab *t = st_strtab_new(2, 0);
    uint32_t id;
    assert_int_equal(st_strtab_intern(t, "a", 1, &id, NULL), ST_OK);
    assert_int_equal(st_strtab_intern(t, "b", 1, &id, NULL), ST_OK);
    assert_int_equal(st_strtab_intern(t, "c", 1, &id, NULL), ST_ERR_LIMIT);
    assert_int_equal(id, UINT32_MAX);
    assert_int_equal(st_strtab_intern(t, "a", 1, &id, NULL), ST_OK);
    assert_int_equal(id, 0);
    st_strtab_free(t);

    t = st_strtab_new(0, 10);
    assert_int_equal(st_strtab_intern(t, "123456", 6, &id, NULL), ST_OK);
    assert_int_equal(st_strtab_intern(t, "12345", 5, &id, NULL), ST_ERR_LIMIT);
    assert_int_equal(st_strtab_intern(t, "1234", 4, &id, NULL), ST_OK);
    assert_int_equal(st_strtab_count(t), 2);
    st_strtab_free(t);
}

/* Every allocation failing in turn while 100 keys go in: ST_ERR_NOMEM,
** and the keys added before the failure are all still there. */
static void test_alloc_failures(void **state)
{
    (void)state;
    for (long k = 1; k < 60; k++) {
        st_alloc_fail_after(k);
        st_strtab *t = st_strtab_new(0, 0);
        st_status rc = t ? ST_OK : ST_ERR_NOMEM;
        uint32_t done = 0;
        char key[16];
        for (; rc == ST_OK && done < 100; done++) {
            uint32_t id;
            int n = snprintf(key, sizeof key, "v%u", done);
            rc = st_strtab_intern(t, key, (size_t)n, &id, NULL);
            if (rc != ST_OK)
                break;
        }
        st_alloc_fail_after(0);
        if (t) {
            assert_int_equal(st_strtab_count(t), done);
            for (uint32_t i = 0; i < done; i++) {
                uint32_t id;
                int n = snprintf(key, sizeof key, "v%u", i);
                assert_true(st_strtab_find(t, key, (size_t)n, &id));
                assert_int_equal(id, i);
            }
        }
        st_strtab_free(t);
        if (rc == ST_OK)
            return;
        assert_int_equal(rc, ST_ERR_NOMEM);
    }
    fail_msg("never completed");
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_ids_dense_in_first_seen_order),
        cmocka_unit_test(test_growth_keeps_everything),
        cmocka_unit_test(test_binary_and_big),
        cmocka_unit_test(test_limits),
        cmocka_unit_test(test_alloc_failures),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
