/*
** test_numfmt.c -- st_fmt_fixed against printf("%.*f") and
** st_parse_decimal_fast against strtod: the same characters and the same
** doubles, on hand-picked hard cases (ties, signs, huge and tiny values)
** and on millions of pseudo-random values at every scale.
*/
#include <float.h>
#include <math.h>
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include <cmocka.h>

#include "stocktake/core.h"

static uint64_t rng_next(uint64_t *s)
{
    *s ^= *s << 13;
    *s ^= *s >> 7;
    *s ^= *s << 17;
    return *s;
}

/* Fail with the value and both texts when st_fmt_fixed differs. */
static void check_fmt(double v, int d)
{
    char want[ST_FMT_FIXED_MAX], got[ST_FMT_FIXED_MAX];
    snprintf(want, sizeof want, "%.*f", d, v);
    size_t n = st_fmt_fixed(got, v, d);
    if (strcmp(want, got) != 0 || n != strlen(want))
        fail_msg("%.17g at %d decimals: printf '%s', st_fmt_fixed '%s' (%zu)", v, d, want,
                 got, n);
}

static void test_fmt_hard_cases(void **state)
{
    (void)state;
    static const double vals[] = {
        0.0, -0.0, 0.5, 1.5, 2.5, 0.125, 0.375, 0.005, 0.015, 0.025, 1.005, 2.675,
        0.045, 1e-300, 5e-324, 4503599627370495.5, 4503599627370496.0, 9007199254740993.0,
        1e15, 1e16, 1e22, 1e23, 1e300, DBL_MAX, -1.5, -0.001, -2.675, 123456.785,
        999.995, 9.995, 0.995, 99999999999999.99, 4503599627370.4951};
    for (size_t i = 0; i < sizeof vals / sizeof vals[0]; i++)
        for (int d = 0; d <= 4; d++)
            check_fmt(vals[i], d);
    check_fmt(NAN, 2);
    check_fmt(INFINITY, 0);
    check_fmt(-INFINITY, 4);
    char out[ST_FMT_FIXED_MAX];
    assert_int_equal(st_fmt_fixed(out, 2.5, 0), 1);
    assert_string_equal(out, "2");          /* ties to even, as printf */
    assert_int_equal(st_fmt_fixed(out, 1234.5, 2), 7);
    assert_string_equal(out, "1234.50");
    assert_int_equal(st_fmt_fixed(out, 0.004, 2), 4);
    assert_string_equal(out, "0.00");
    st_fmt_fixed(out, 7.0, 99);               /* clamped to 15 */
    assert_string_equal(out, "7.000000000000000");
    st_fmt_fixed(out, 7.0, -3);               /* clamped to 0 */
    assert_string_equal(out, "7");
}

static void test_fmt_random_values(void **state)
{
    (void)state;
    uint64_t s = 0x9e3779b97f4a7c15ULL;
    for (int i = 0; i < 600000; i++) {
        uint64_t r = rng_next(&s);
        /* mantissa at a random scale from 1e-6 to 1e16 */
        double v = (double)(r >> 11) / 9007199254740992.0 * pow(10.0, (double)(int)(r % 23) - 6);
        check_fmt(v, (int)((r >> 5) % 5));
        /* numbers that sit on or near a rounding boundary of 2 decimals */
        double t = (double)(r % 100000000) / 1000.0 + 0.005;
        check_fmt(t, 2);
        check_fmt(nextafter(t, 0), 2);
        check_fmt(nextafter(t, 1e9), 2);
        /* whole numbers, as ids are formatted */
        check_fmt((double)(r >> 20), 0);
    }
}

static void check_parse(const char *text, int expect_fast)
{
    double got = -12345.0;
    int fast = st_parse_decimal_fast(text, &got);
    assert_int_equal(fast, expect_fast);
    if (!fast) {
        assert_true(got == -12345.0);   /* untouched */
        return;
    }
    double want = strtod(text, NULL);
    if (memcmp(&want, &got, sizeof want) != 0)
        fail_msg("'%s': strtod %.17g, fast %.17g", text, want, got);
}

static void test_parse_cases(void **state)
{
    (void)state;
    check_parse("0", 1);
    check_parse("-0", 1);
    check_parse("-0.00", 1);
    check_parse("12.5", 1);
    check_parse("0.1", 1);
    check_parse("123456789012345", 1);
    check_parse("1234567890.12345", 1);
    check_parse("0.00000000000001", 1);
    check_parse("0.000000000000001", 0);   /* 16 digits with the zero */
    check_parse("1234567890123456", 0);   /* 16 digits */
    check_parse("1.", 0);
    check_parse(".5", 0);
    check_parse("", 0);
    check_parse("-", 0);
    check_parse("+1", 0);
    check_parse(" 1", 0);
    check_parse("1 ", 0);
    check_parse("1e5", 0);
    check_parse("inf", 0);
    check_parse("nan", 0);
    check_parse("0x10", 0);
    check_parse("1.2.3", 0);
    check_parse("12a", 0);
}

static void test_parse_random_texts(void **state)
{
    (void)state;
    uint64_t s = 0x2545f4914f6cdd1dULL;
    char text[64];
    long nfast = 0;
    for (int i = 0; i < 600000; i++) {
        uint64_t r = rng_next(&s);
        int digits = 1 + (int)(r % 15), frac = (int)((r >> 4) % (uint64_t)(digits + 1));
        size_t len = 0;
        if ((r >> 8) & 1)
            text[len++] = '-';
        uint64_t q = rng_next(&s);
        for (int k = 0; k < digits; k++) {
            if (k == digits - frac && frac > 0)
                text[len++] = k == 0 ? '0' : '.';
            if (k == 0 && frac == digits)
                text[len++] = '.';
            text[len++] = (char)('0' + q % 10);
            q /= 10;
            if (!q)
                q = rng_next(&s);
        }
        text[len] = '\0';
        int fast = st_parse_decimal_fast(text, &(double){0});
        nfast += fast;
        check_parse(text, fast);
        /* the texts st_inventory writes, too */
        char fixed[ST_FMT_FIXED_MAX];
        st_fmt_fixed(fixed, (double)(r >> 24) / 100.0, 2);
        check_parse(fixed, 1);
    }
    assert_true(nfast > 400000);   /* most texts took the fast path */
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_fmt_hard_cases),
        cmocka_unit_test(test_fmt_random_values),
        cmocka_unit_test(test_parse_cases),
        cmocka_unit_test(test_parse_random_texts),
    };
    return cmocka_run_group_tests_name("numfmt", tests, NULL, NULL);
}
