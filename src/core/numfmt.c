/*
** core/numfmt.c -- decimal numbers written and read quickly, with exactly
** the results of printf("%.Nf") and strtod: the writers format and parse
** millions of areas and ids, and the C library's exact algorithms
** (multi-precision arithmetic for every number) were a fifth of the
** GeoPackage write (docs/performance.md).
**
** Input:   a double and a number of decimals; or a decimal text.
** Output:  the same characters printf("%.*f") gives, and the same double
**          strtod gives, in the default rounding mode. The fast paths take
**          only cases whose result is provably the library's: the rest are
**          handed to snprintf (formatting) or reported as not decided
**          (parsing), so the caller falls back to strtod.
** Why exact: formatting rounds v * 10^d to an integer N. The product is
**          computed in double with an error under half a unit in the last
**          place; N is the correctly rounded value unless the product lies
**          within that error of a half-integer, and those cases go to
**          snprintf. Parsing: N (at most 15 digits, so below 2^53) and 10^d
**          (d <= 15, so exact) are exact doubles, and IEEE division rounds
**          the true quotient N / 10^d correctly, which is what strtod
**          returns for the text.
** Errors:  none; the functions cannot fail.
** Limits:  decimals 0..ST_FMT_MAX_DECIMALS; the output buffer holds
**          ST_FMT_FIXED_MAX bytes (enough for any double at those
**          decimals).
*/
#include <math.h>
#include <stdio.h>
#include <string.h>

#include "stocktake/core.h"

static const double pow10_exact[] = {1e0,  1e1,  1e2,  1e3,  1e4,  1e5,  1e6,  1e7,
                                     1e8,  1e9,  1e10, 1e11, 1e12, 1e13, 1e14, 1e15};

size_t st_fmt_fixed(char *out, double v, int decimals)
{
    if (decimals < 0)
        decimals = 0;
    if (decimals > ST_FMT_MAX_DECIMALS)
        decimals = ST_FMT_MAX_DECIMALS;
    /* Fast path: finite, not negative (no "-0.00" subtleties), and the
    ** scaled value well inside the exact integers of a double. */
    if (v >= 0 && !signbit(v) && v < 4503599627370496.0 /* 2^52 */) {
        double y = v * pow10_exact[decimals];
        if (y < 4503599627370496.0) {
            double fl = floor(y);
            double frac = y - fl;               /* exact */
            double margin = ldexp(y, -50);      /* > the product's error */
            if (fabs(frac - 0.5) > margin) {
                uint64_t n = (uint64_t)fl + (frac > 0.5);
                char digits[24];
                size_t nd = 0;
                do {
                    digits[nd++] = (char)('0' + n % 10);
                    n /= 10;
                } while (n);
                while (nd <= (size_t)decimals)   /* at least one digit before '.' */
                    digits[nd++] = '0';
                size_t len = 0;
                while (nd > (size_t)decimals)
                    out[len++] = digits[--nd];
                if (decimals > 0) {
                    out[len++] = '.';
                    while (nd)
                        out[len++] = digits[--nd];
                }
                out[len] = '\0';
                return len;
            }
        }
    }
    int n = snprintf(out, ST_FMT_FIXED_MAX, "%.*f", decimals, v);
    return n < 0 ? 0 : (size_t)n < ST_FMT_FIXED_MAX ? (size_t)n : ST_FMT_FIXED_MAX - 1;
}

int st_parse_decimal_fast(const char *s, double *out)
{
    const char *p = s;
    int neg = *p == '-';
    p += neg;
    uint64_t n = 0;
    int ndigits = 0, nfrac = 0;
    const char *start = p;
    while (*p >= '0' && *p <= '9') {
        n = n * 10 + (uint64_t)(*p++ - '0');
        if (++ndigits > 15)
            return 0;
    }
    if (p == start)
        return 0;
    if (*p == '.') {
        const char *f = ++p;
        while (*p >= '0' && *p <= '9') {
            n = n * 10 + (uint64_t)(*p++ - '0');
            if (++ndigits > 15)
                return 0;
        }
        nfrac = (int)(p - f);
        if (nfrac == 0)
            return 0;
    }
    if (*p)
        return 0;
    double v = nfrac ? (double)n / pow10_exact[nfrac] : (double)n;
    *out = neg ? -v : v;
    return 1;
}
