/*
** rules/text.c -- text helpers of the rule language: case and accent
** folding, reading numbers out of attribute values, edit distance.
**
** Folding (docs/rules.md, "Matching"): case folding covers ASCII, Latin-1
** Supplement, Latin Extended-A, Greek (U+0386..U+03CE) and Cyrillic
** (U+0400..U+04FF, the basic and extended pairs); accent stripping maps
** every letter of Latin-1 Supplement and Latin Extended-A to its base
** letters (with Æ -> AE, ß -> ss, Œ -> OE, Ø -> O, Ł -> L ...), removes
** Greek tonos and dialytika, maps Cyrillic Ё/ё to Е/е, and drops combining
** marks U+0300..U+036F. Other characters are kept as they are.
**
** Input:   UTF-8 text; invalid bytes are copied unchanged.
** Output:  appended to an st_buf, or a number.
** Errors:  ST_ERR_NOMEM (and ST_ERR_LIMIT from a capped buffer).
*/
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "rulesInt.h"

/* Decode one UTF-8 character at s (n bytes left); *len its length.
** Returns -1 for an invalid sequence (then *len = 1). */
static long decode(const unsigned char *s, size_t n, size_t *len)
{
    unsigned c = s[0];
    size_t k;
    long cp;
    if (c < 0x80) {
        *len = 1;
        return c;
    }
    if (c >= 0xC2 && c <= 0xDF) { k = 2; cp = c & 0x1F; }
    else if (c >= 0xE0 && c <= 0xEF) { k = 3; cp = c & 0x0F; }
    else if (c >= 0xF0 && c <= 0xF4) { k = 4; cp = c & 0x07; }
    else { *len = 1; return -1; }
    if (k > n) {
        *len = 1;
        return -1;
    }
    for (size_t i = 1; i < k; i++) {
        if ((s[i] & 0xC0) != 0x80) {
            *len = 1;
            return -1;
        }
        cp = (cp << 6) | (s[i] & 0x3F);
    }
    *len = k;
    return cp;
}

static st_status encode(st_buf *b, long cp)
{
    char o[4];
    size_t n;
    if (cp < 0x80) { o[0] = (char)cp; n = 1; }
    else if (cp < 0x800) { o[0] = (char)(0xC0 | (cp >> 6)); o[1] = (char)(0x80 | (cp & 0x3F)); n = 2; }
    else if (cp < 0x10000) {
        o[0] = (char)(0xE0 | (cp >> 12));
        o[1] = (char)(0x80 | ((cp >> 6) & 0x3F));
        o[2] = (char)(0x80 | (cp & 0x3F));
        n = 3;
    } else {
        o[0] = (char)(0xF0 | (cp >> 18));
        o[1] = (char)(0x80 | ((cp >> 12) & 0x3F));
        o[2] = (char)(0x80 | ((cp >> 6) & 0x3F));
        o[3] = (char)(0x80 | (cp & 0x3F));
        n = 4;
    }
    return st_buf_append(b, o, n);
}

/* Base letters of U+00C0..U+017F, one space-separated entry each; "-"
** keeps the character (× and ÷). */
static const char *const strip_latin =
    "A A A A A A AE C E E E E I I I I D N O O O O O - O U U U U Y TH ss "
    "a a a a a a ae c e e e e i i i i d n o o o o o - o u u u u y th y "
    "A a A a A a C c C c C c C c D d D d E e E e E e E e E e G g G g "
    "G g G g H h H h I i I i I i I i I i IJ ij J j K k k L l L l L l L "
    "l L l N n N n N n n N n O o O o O o OE oe R r R r R r S s S s S s "
    "S s T t T t T t U u U u U u U u U u U u W w Y y Y Z z Z z Z z s";

/* Entry i of strip_latin into out (NUL-terminated); 0 for "-". */
static int strip_entry(long cp, char out[4])
{
    long i = cp - 0xC0;
    const char *p = strip_latin;
    while (i-- > 0) {
        p = strchr(p, ' ');
        if (!p)
            return 0;
        p++;
    }
    size_t n = strcspn(p, " ");
    if (n == 1 && *p == '-')
        return 0;
    memcpy(out, p, n);
    out[n] = '\0';
    return 1;
}

/* Greek and Cyrillic letters without their accents (0 = no change). */
static long strip_other(long cp)
{
    static const long greek[][2] = {
        {0x386, 0x391}, {0x388, 0x395}, {0x389, 0x397}, {0x38A, 0x399}, {0x38C, 0x39F},
        {0x38E, 0x3A5}, {0x38F, 0x3A9}, {0x390, 0x3B9}, {0x3AA, 0x399}, {0x3AB, 0x3A5},
        {0x3AC, 0x3B1}, {0x3AD, 0x3B5}, {0x3AE, 0x3B7}, {0x3AF, 0x3B9}, {0x3B0, 0x3C5},
        {0x3CA, 0x3B9}, {0x3CB, 0x3C5}, {0x3CC, 0x3BF}, {0x3CD, 0x3C5}, {0x3CE, 0x3C9},
        {0x401, 0x415}, {0x451, 0x435},
    };
    for (size_t i = 0; i < sizeof greek / sizeof *greek; i++)
        if (greek[i][0] == cp)
            return greek[i][1];
    return 0;
}

/* Lower case of cp within the covered blocks. */
static long fold_case(long cp)
{
    if (cp < 0x80)
        return cp >= 'A' && cp <= 'Z' ? cp + 32 : cp;
    if (cp >= 0xC0 && cp <= 0xDE && cp != 0xD7)
        return cp + 32;
    if (cp >= 0x100 && cp <= 0x17F) {
        if (cp == 0x130)
            return 'i';
        if (cp == 0x178)
            return 0xFF;
        if (cp == 0x17F)
            return 's';
        if ((cp >= 0x100 && cp <= 0x137) || (cp >= 0x14A && cp <= 0x177))
            return (cp & 1) ? cp : cp + 1;
        if ((cp >= 0x139 && cp <= 0x148) || (cp >= 0x179 && cp <= 0x17E))
            return (cp & 1) ? cp + 1 : cp;
        return cp;
    }
    if (cp >= 0x391 && cp <= 0x3A9 && cp != 0x3A2)
        return cp + 32;
    if (cp == 0x386)
        return 0x3AC;
    if (cp >= 0x388 && cp <= 0x38A)
        return cp + 37;
    if (cp == 0x38C)
        return 0x3CC;
    if (cp == 0x38E || cp == 0x38F)
        return cp + 63;
    if (cp == 0x3C2)
        return 0x3C3;   /* final sigma */
    if (cp >= 0x410 && cp <= 0x42F)
        return cp + 32;
    if (cp >= 0x400 && cp <= 0x40F)
        return cp + 80;
    if ((cp >= 0x460 && cp <= 0x481) || (cp >= 0x48A && cp <= 0x4BF))
        return (cp & 1) ? cp : cp + 1;
    return cp;
}

st_status st_rtext_fold(const char *s, size_t n, unsigned fold, st_buf *out)
{
    const unsigned char *u = (const unsigned char *)s;
    size_t i = 0;
    while (i < n) {
        size_t len;
        long cp = decode(u + i, n - i, &len);
        st_status rc;
        if (cp < 0) {
            rc = st_buf_append(out, s + i, 1);
        } else {
            char base[4];
            if ((fold & FOLD_ACCENTS) && cp >= 0x300 && cp <= 0x36F) {
                i += len;
                continue;
            }
            if ((fold & FOLD_ACCENTS) && cp >= 0xC0 && cp <= 0x17F && strip_entry(cp, base)) {
                if (fold & FOLD_CASE)
                    for (char *p = base; *p; p++)
                        *p = (char)fold_case((unsigned char)*p);
                rc = st_buf_puts(out, base);
                i += len;
                if (rc != ST_OK)
                    return rc;
                continue;
            }
            if (fold & FOLD_ACCENTS) {
                long b = strip_other(cp);
                if (b)
                    cp = b;
            }
            if (fold & FOLD_CASE)
                cp = fold_case(cp);
            rc = encode(out, cp);
        }
        if (rc != ST_OK)
            return rc;
        i += len;
    }
    return ST_OK;
}

size_t st_rtext_distance(const char *a, const char *b, size_t cap)
{
    size_t n = strlen(a), m = strlen(b);
    if (n > 64 || m > 64)
        return cap + 1;
    if ((n > m ? n - m : m - n) > cap)
        return cap + 1;
    size_t row[65];
    for (size_t j = 0; j <= m; j++)
        row[j] = j;
    for (size_t i = 1; i <= n; i++) {
        size_t diag = row[0];
        row[0] = i;
        size_t best = row[0];
        for (size_t j = 1; j <= m; j++) {
            size_t up = row[j];
            size_t cost = a[i - 1] == b[j - 1] ? 0 : 1;
            size_t v = diag + cost;
            if (up + 1 < v)
                v = up + 1;
            if (row[j - 1] + 1 < v)
                v = row[j - 1] + 1;
            row[j] = v;
            diag = up;
            if (v < best)
                best = v;
        }
        if (best > cap)
            return cap + 1;
    }
    return row[m] > cap ? cap + 1 : row[m];
}

const char *st_rtext_trim(const char *s, size_t *n)
{
    size_t len = *n;
    while (len && (*s == ' ' || *s == '\t' || *s == '\r' || *s == '\n')) {
        s++;
        len--;
    }
    while (len && (s[len - 1] == ' ' || s[len - 1] == '\t' || s[len - 1] == '\r' ||
                   s[len - 1] == '\n'))
        len--;
    *n = len;
    return s;
}

/* ---- numbers in attribute values ---------------------------------------- */

typedef struct cursor {
    const char *p, *end;
} cursor;

static void skip_spaces(cursor *c)
{
    while (c->p < c->end && (*c->p == ' ' || *c->p == '\t'))
        c->p++;
}

static int ci_prefix(const cursor *c, const char *word)
{
    size_t n = strlen(word);
    if ((size_t)(c->end - c->p) < n)
        return 0;
    for (size_t i = 0; i < n; i++) {
        int a = (unsigned char)c->p[i];
        if (a >= 'A' && a <= 'Z')
            a += 32;
        if (a != word[i])
            return 0;
    }
    /* whole word only */
    if (c->p + n < c->end) {
        unsigned char nx = (unsigned char)c->p[n];
        if ((nx >= 'a' && nx <= 'z') || (nx >= 'A' && nx <= 'Z'))
            return 0;
    }
    return 1;
}

/* A plain decimal: [-] digits [ . digits ]. */
static int read_decimal(cursor *c, double *out)
{
    const char *s = c->p;
    char tmp[64];
    size_t n = 0;
    if (s < c->end && *s == '-')
        tmp[n++] = *s++;
    size_t digits = 0;
    while (s < c->end && *s >= '0' && *s <= '9' && n < 60) {
        tmp[n++] = *s++;
        digits++;
    }
    if (s + 1 < c->end && *s == '.' && s[1] >= '0' && s[1] <= '9') {
        tmp[n++] = *s++;
        while (s < c->end && *s >= '0' && *s <= '9' && n < 62)
            tmp[n++] = *s++;
    }
    if (!digits || (s < c->end && *s >= '0' && *s <= '9'))
        return 0;
    tmp[n] = '\0';
    *out = strtod(tmp, NULL);
    c->p = s;
    return 1;
}

/* An optional length unit; the factor to metres (1 without a unit). */
static double read_unit(cursor *c)
{
    static const struct { const char *w; double f; } units[] = {
        {"metres", 1}, {"meters", 1}, {"metre", 1}, {"meter", 1}, {"m", 1},
        {"feet", 0.3048}, {"foot", 0.3048}, {"ft", 0.3048}, {"'", 0.3048},
        {"cm", 0.01},
    };
    skip_spaces(c);
    for (size_t i = 0; i < sizeof units / sizeof *units; i++)
        if (ci_prefix(c, units[i].w)) {
            c->p += strlen(units[i].w);
            return units[i].f;
        }
    return 1.0;
}

/* number [unit] [ ("-" | "–" | "to") number [unit] ]: the upper bound. */
static int read_part(cursor *c, double *out)
{
    skip_spaces(c);
    double a, b;
    if (!read_decimal(c, &a))
        return 0;
    a *= read_unit(c);
    skip_spaces(c);
    int range = 0;
    if (c->p < c->end && *c->p == '-') {
        c->p++;
        range = 1;
    } else if (c->end - c->p >= 3 && !memcmp(c->p, "\xE2\x80\x93", 3)) {
        c->p += 3;
        range = 1;
    } else if (ci_prefix(c, "to")) {
        c->p += 2;
        range = 1;
    }
    if (range) {
        skip_spaces(c);
        if (!read_decimal(c, &b))
            return 0;
        b *= read_unit(c);
        a = b > a ? b : a;
    }
    skip_spaces(c);
    *out = a;
    return 1;
}

static int read_word(const char *s, size_t n, double *out)
{
    static const char *const words[] = {
        "zero", "one", "two", "three", "four", "five", "six", "seven", "eight", "nine", "ten",
        "eleven", "twelve", "thirteen", "fourteen", "fifteen", "sixteen", "seventeen",
        "eighteen", "nineteen", "twenty"};
    for (size_t i = 0; i < sizeof words / sizeof *words; i++) {
        cursor c = {s, s + n};
        if (strlen(words[i]) == n && ci_prefix(&c, words[i])) {
            *out = (double)i;
            return 1;
        }
    }
    return 0;
}

/* "R+2" or "G+2" anywhere in the text, not preceded by a letter: ground
** floor plus two, 3 storeys. */
static int read_ground_plus(const char *s, size_t n, double *out)
{
    for (size_t i = 0; i + 2 < n; i++) {
        char c = s[i];
        if (c != 'R' && c != 'G' && c != 'r' && c != 'g')
            continue;
        if (i > 0 && ((s[i - 1] >= 'a' && s[i - 1] <= 'z') || (s[i - 1] >= 'A' && s[i - 1] <= 'Z')))
            continue;
        size_t j = i + 1;
        while (j < n && s[j] == ' ')
            j++;
        if (j >= n || s[j] != '+')
            continue;
        j++;
        while (j < n && s[j] == ' ')
            j++;
        if (j >= n || s[j] < '0' || s[j] > '9')
            continue;
        double v = 0;
        while (j < n && s[j] >= '0' && s[j] <= '9' && v < 1e6)
            v = v * 10 + (s[j++] - '0');
        *out = v + 1;
        return 1;
    }
    return 0;
}

int st_rtext_number(const char *s, size_t n, unsigned accept, double *out)
{
    s = st_rtext_trim(s, &n);
    if (!n)
        return 0;
    if ((accept & ACCEPT_WORDS) && read_word(s, n, out))
        return 1;
    double best = -HUGE_VAL;
    cursor c = {s, s + n};
    for (;;) {
        double v;
        if (!read_part(&c, &v))
            break;
        if (v > best)
            best = v;
        if (c.p == c.end) {
            *out = best;
            return isfinite(best);
        }
        if (*c.p != ';')
            break;
        c.p++;
    }
    if ((accept & ACCEPT_GROUND_PLUS) && read_ground_plus(s, n, out))
        return 1;
    return 0;
}

int st_rtext_year(const char *s, size_t n, double *out)
{
    for (size_t i = 0; i < n; i++) {
        if (s[i] < '0' || s[i] > '9' || (i > 0 && s[i - 1] >= '0' && s[i - 1] <= '9'))
            continue;
        size_t j = i;
        while (j < n && s[j] >= '0' && s[j] <= '9')
            j++;
        if (j - i == 4) {
            *out = (s[i] - '0') * 1000 + (s[i + 1] - '0') * 100 + (s[i + 2] - '0') * 10 +
                   (s[i + 3] - '0');
            return 1;
        }
        i = j;
    }
    return 0;
}
