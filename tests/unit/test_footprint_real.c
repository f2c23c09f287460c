/*
** tests/unit/test_footprint_real.c -- the footprint stage on the real OSM
** extracts of ../shared/data/real, against shapely's verdicts.
**
** Outside reference: tests/ref/real_validity.py runs /usr/bin/python3 with
** geopandas and shapely (GEOS), and dumps every building as hex WKB in
** lon/lat, with shapely's is_valid for it and the count per extract. The
** test checks that stocktake's verdict matches shapely's for every feature
** and extract. The data README says north_macedonia has 1 invalid
** footprint, a ring self-intersection, and the other extracts have none. It
** also checks that the default repair makes that one valid.
** It is skipped when the data or the Python modules are missing. Run it
** from the checkout root, as `make` does.
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

#include "stocktake/footprint.h"
#include "stocktake/geomx.h"

#define REAL "../shared/data/real"
#define SCRIPT "/usr/bin/python3 tests/ref/real_validity.py " REAL " 2>/dev/null"

static int hexval(char c)
{
    return c >= '0' && c <= '9' ? c - '0' : c >= 'a' && c <= 'f' ? c - 'a' + 10
         : c >= 'A' && c <= 'F' ? c - 'A' + 10 : -1;
}

/* Decodes hex into a new buffer (caller frees); NULL on bad input. */
static unsigned char *unhex(const char *hex, size_t *n)
{
    size_t len = strcspn(hex, " \n");
    if (len % 2)
        return NULL;
    unsigned char *b = malloc(len / 2 + 1);
    assert_non_null(b);
    for (size_t i = 0; i < len / 2; i++) {
        int hi = hexval(hex[2 * i]), lo = hexval(hex[2 * i + 1]);
        if (hi < 0 || lo < 0) {
            free(b);
            return NULL;
        }
        b[i] = (unsigned char)(hi * 16 + lo);
    }
    *n = len / 2;
    return b;
}

typedef struct tally {
    st_footprint_checker *ck;
    st_geos *gx;
    st_footprint_config keep, repair;
    long features, invalid, disagree, extracts;
    char invalid_code[64];   /* code of the last invalid feature found */
} tally;

/* One "F slug index valid hex" line: stocktake's verdict vs shapely's. */
static void one_feature(tally *t, const char *slug, long index, const char *valid,
                        const char *hex)
{
    st_feature *f = st_feature_new();
    assert_non_null(f);
    f->bid = (uint64_t)index;
    if (strcmp(hex, "NULL") != 0) {
        size_t n = 0;
        unsigned char *wkb = unhex(hex, &n);
        assert_non_null(wkb);
        char err[256];
        assert_int_equal(st_geom_from_wkb(t->gx, wkb, n, &f->geom, err, sizeof err), ST_OK);
        free(wkb);
    }
    st_findings out;
    st_findings_init(&out);
    assert_int_equal(st_footprint_check(t->ck, &t->keep, f, &out), ST_OK);
    int ours = (f->flags & (ST_FLAG_INVALID | ST_FLAG_TOO_FEW_POINTS | ST_FLAG_BAD_COORD |
                            ST_FLAG_UNCLOSED)) != 0;
    t->features++;
    if (valid[0] != '-') {
        int theirs = valid[0] == '0';
        if (ours != theirs) {
            print_message("%s feature %ld: shapely %s, stocktake %s\n", slug, index,
                          theirs ? "invalid" : "valid", ours ? "invalid" : "valid");
            t->disagree++;
        }
    }
    if (ours) {
        t->invalid++;
        for (size_t i = 0; i < out.count; i++)
            if (out.items[i].severity == ST_SEV_ERROR)
                snprintf(t->invalid_code, sizeof t->invalid_code, "%s", out.items[i].code);
        /* and the default policy repairs it to a valid footprint */
        st_findings_free(&out);
        assert_int_equal(st_footprint_check(t->ck, &t->repair, f, &out), ST_OK);
        if (f->status != ST_STATUS_REPAIRED)
            fail_msg("%s feature %ld not repaired: %s", slug, index, f->reason);
        for (size_t i = 0; i < out.count; i++)
            print_message("  %s feature %ld: %s: %s\n", slug, index, out.items[i].code,
                          out.items[i].message);
        char err[256];
        GEOSGeometry *g = st_geom_to_geos(t->gx, &f->geom, err, sizeof err);
        assert_non_null(g);
        assert_int_equal(GEOSisValid_r(t->gx->h, g), 1);
        GEOSGeom_destroy_r(t->gx->h, g);
    }
    st_findings_free(&out);
    st_feature_free(f);
}

/* The README's invalid count per extract. */
static long readme_invalid(const char *slug)
{
    return strcmp(slug, "north_macedonia") == 0 ? 1 : 0;
}

static void test_real_validity_matches_shapely(void **state)
{
    (void)state;
    if (access(REAL "/README.md", R_OK) != 0)
        skip();
    FILE *py = popen(SCRIPT, "r");
    if (!py)
        skip();
    tally t;
    memset(&t, 0, sizeof t);
    assert_int_equal(st_footprint_checker_new(&t.ck), ST_OK);
    t.gx = st_geos_new();
    assert_non_null(t.gx);
    t.keep = st_footprint_config_default();
    t.keep.repair = ST_REPAIR_KEEP;
    t.repair = st_footprint_config_default();
    long start_features = 0, start_invalid = 0;
    char *line = NULL;
    size_t cap = 0;
    while (getline(&line, &cap, py) > 0) {
        char slug[64], valid[4];
        long index, count, invalid;
        int at = 0;
        if (sscanf(line, "F %63s %ld %3s %n", slug, &index, valid, &at) == 3 && at > 0) {
            one_feature(&t, slug, index, valid, line + at);
        } else if (sscanf(line, "N %63s %ld %ld", slug, &count, &invalid) == 3) {
            long ours = t.invalid - start_invalid;
            print_message("%-16s %6ld features, shapely %ld invalid, stocktake %ld\n", slug,
                          count, invalid, ours);
            assert_int_equal(t.features - start_features, count);
            assert_int_equal(ours, invalid);
            assert_int_equal(invalid, readme_invalid(slug));
            start_features = t.features;
            start_invalid = t.invalid;
            t.extracts++;
        }
    }
    free(line);
    int rc = pclose(py);
    st_geos_free(t.gx);
    st_footprint_checker_free(t.ck);
    if (t.extracts == 0 && rc != 0)
        skip();   /* no /usr/bin/python3 with geopandas here */
    assert_int_equal(t.extracts, 6);
    assert_int_equal(t.disagree, 0);
    assert_int_equal(t.invalid, 1);
    assert_string_equal(t.invalid_code, "geom.ring-self-intersection");
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_real_validity_matches_shapely),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
