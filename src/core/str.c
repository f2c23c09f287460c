/*
** core/str.c -- small string helpers: suffix tests, UTF-8 validation, and
** the run's clock (honouring SOURCE_DATE_EPOCH).
*/
#include <ctype.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

#include "stocktake/core.h"

int st_str_ends_with_ci(const char *s, const char *suffix)
{
    size_t n = strlen(s), m = strlen(suffix);
    if (m > n)
        return 0;
    for (size_t i = 0; i < m; i++)
        if (tolower((unsigned char)s[n - m + i]) != tolower((unsigned char)suffix[i]))
            return 0;
    return 1;
}

/* Length of the valid UTF-8 sequence at s (at most n bytes), 0 if invalid.
** Rejects overlong forms, surrogates and code points above U+10FFFF. */
static size_t utf8_seq(const unsigned char *s, size_t n)
{
    unsigned c = s[0];
    if (c < 0x80)
        return 1;
    size_t len;
    unsigned min;
    if (c >= 0xC2 && c <= 0xDF) { len = 2; min = 0x80; }
    else if (c >= 0xE0 && c <= 0xEF) { len = 3; min = 0x800; }
    else if (c >= 0xF0 && c <= 0xF4) { len = 4; min = 0x10000; }
    else return 0;
    if (len > n)
        return 0;
    unsigned cp = c & (0x7F >> len);
    for (size_t i = 1; i < len; i++) {
        if ((s[i] & 0xC0) != 0x80)
            return 0;
        cp = (cp << 6) | (s[i] & 0x3F);
    }
    if (cp < min || cp > 0x10FFFF || (cp >= 0xD800 && cp <= 0xDFFF))
        return 0;
    return len;
}

size_t st_utf8_valid_prefix(const char *s, size_t n)
{
    size_t i = 0;
    while (i < n) {
        size_t k = utf8_seq((const unsigned char *)s + i, n - i);
        if (!k)
            break;
        i += k;
    }
    return i;
}

char *st_utf8_sanitize(const char *s, size_t n)
{
    st_buf b;
    st_buf_init(&b, 0);
    size_t i = 0;
    while (i < n) {
        size_t k = utf8_seq((const unsigned char *)s + i, n - i);
        st_status rc = k ? st_buf_append(&b, s + i, k)
                         : st_buf_append(&b, "\xEF\xBF\xBD", 3);
        if (rc != ST_OK) {
            st_buf_free(&b);
            return NULL;
        }
        i += k ? k : 1;
    }
    return st_buf_take(&b);
}

void st_now_iso8601(char buf[32])
{
    time_t t = time(NULL);
    const char *epoch = getenv("SOURCE_DATE_EPOCH");
    if (epoch && *epoch) {
        char *end;
        long long v = strtoll(epoch, &end, 10);
        if (!*end && v >= 0)
            t = (time_t)v;
    }
    struct tm tmv;
    if (!gmtime_r(&t, &tmv) || !strftime(buf, 32, "%Y-%m-%dT%H:%M:%SZ", &tmv))
        strcpy(buf, "1970-01-01T00:00:00Z");
}
