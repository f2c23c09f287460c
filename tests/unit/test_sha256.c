/*
** tests/unit/test_sha256.c -- SHA-256 against the FIPS 180-2 example
** vectors (appendix B: "abc", the 448-bit message, one million 'a') and
** against GNU coreutils' sha256sum on files of awkward lengths.
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

#include "stocktake/sha256.h"

static void test_fips_abc(void **state)
{
    (void)state;
    char hex[65];
    st_sha256_hex("abc", 3, hex);   /* FIPS 180-2 B.1 */
    assert_string_equal(hex, "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad");
}

static void test_fips_448_bits(void **state)
{
    (void)state;
    const char *m = "abcdbcdecdefdefgefghfghighijhijkijkljklmklmnlmnomnopnopq";
    char hex[65];
    st_sha256_hex(m, strlen(m), hex);   /* FIPS 180-2 B.2 */
    assert_string_equal(hex, "248d6a61d20638b8e5c026930c3e6039a33ce45964ff2167f6ecedd419db06c1");
}

static void test_fips_million_a(void **state)
{
    (void)state;
    /* FIPS 180-2 B.3, fed in uneven pieces to exercise the block buffer */
    char piece[997];
    memset(piece, 'a', sizeof piece);
    st_sha256 s;
    st_sha256_init(&s);
    size_t left = 1000000;
    while (left) {
        size_t n = left < sizeof piece ? left : sizeof piece;
        st_sha256_update(&s, piece, n);
        left -= n;
    }
    uint8_t d[32];
    st_sha256_final(&s, d);
    assert_int_equal(d[0], 0xcd);
    assert_int_equal(d[31], 0xd0);
    char *big = malloc(1000000);
    assert_non_null(big);
    memset(big, 'a', 1000000);
    char hex[65];
    st_sha256_hex(big, 1000000, hex);
    free(big);
    assert_string_equal(hex, "cdc76e5c9914fb9281a1c7e284d73e67f1809a48a497200e046d39ccc7112cd0");
}

static void test_empty(void **state)
{
    (void)state;
    char hex[65];
    st_sha256_hex("", 0, hex);   /* FIPS 180-4 examples: the empty message */
    assert_string_equal(hex, "e3b0c44298fc1c149afbf4c8996fb92427ae41e4649b934ca495991b7852b855");
}

/* Files of lengths around the padding boundaries (55, 56, 63, 64, 65 ...)
** hashed by st_sha256_file and by sha256sum. */
static void test_files_against_sha256sum(void **state)
{
    (void)state;
    static const size_t lengths[] = {0, 1, 55, 56, 57, 63, 64, 65, 119, 120, 128, 65535, 65536, 65537, 200003};
    char path[] = "/tmp/st_sha256_XXXXXX";
    int fd = mkstemp(path);
    assert_true(fd >= 0);
    close(fd);
    uint32_t x = 2463534242u;   /* xorshift: arbitrary bytes, all values */
    for (size_t k = 0; k < sizeof lengths / sizeof *lengths; k++) {
        FILE *fp = fopen(path, "wb");
        assert_non_null(fp);
        for (size_t i = 0; i < lengths[k]; i++) {
            x ^= x << 13;
            x ^= x >> 17;
            x ^= x << 5;
            fputc((int)(x & 0xff), fp);
        }
        fclose(fp);
        char ours[65];
        uint64_t bytes = 0;
        st_diags d;
        st_diags_init(&d);
        assert_int_equal(st_sha256_file(path, ours, &bytes, &d), ST_OK);
        st_diags_free(&d);
        assert_int_equal(bytes, lengths[k]);
        char cmd[128], theirs[80] = "";
        snprintf(cmd, sizeof cmd, "sha256sum %s", path);
        FILE *p = popen(cmd, "r");
        assert_non_null(p);
        assert_non_null(fgets(theirs, sizeof theirs, p));
        pclose(p);
        theirs[64] = '\0';
        assert_string_equal(ours, theirs);
    }
    remove(path);
}

static void test_missing_file(void **state)
{
    (void)state;
    st_diags d;
    st_diags_init(&d);
    char hex[65];
    uint64_t bytes = 7;
    assert_int_equal(st_sha256_file("/nonexistent/x.geojson", hex, &bytes, &d), ST_ERR_IO);
    assert_int_equal(d.errors, 1);
    assert_string_equal(d.items[0].file, "/nonexistent/x.geojson");
    assert_int_equal(bytes, 0);
    st_diags_free(&d);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_fips_abc),
        cmocka_unit_test(test_fips_448_bits),
        cmocka_unit_test(test_fips_million_a),
        cmocka_unit_test(test_empty),
        cmocka_unit_test(test_files_against_sha256sum),
        cmocka_unit_test(test_missing_file),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
