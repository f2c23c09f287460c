/*
** tests/unit/test_rules_real.c -- the starter pack over attribute tables
** extracted from the real layers in /work/shared/data/real.
**
** The readers are another module, so tests/e2e/test_rules_real.sh extracts
** each layer's attributes with /usr/bin/python3 (json, geopandas) into a
** TSV (first line: field names; "\N" = missing) and runs this program with
** ST_RULES_REAL_TSV and ST_RULES_REAL_OUT set. It writes, per row, every
** schema field's value, provenance and rule; the script checks them
** against its own reading of the source values. Without the variables
** (plain `make unit`) the test is skipped.
**
** Here: every value is valid for its field, and every field has a rule.
*/
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <cmocka.h>

#include "stocktake/rules.h"

static const char *starter_path(void)
{
    static char path[4096];
    const char *here = __FILE__;
    const char *slash = strrchr(here, '/');
    size_t n = slash ? (size_t)(slash - here) : 0;
    snprintf(path, sizeof path, "%.*s%s../../rules/starter.rules", (int)n, here, n ? "/" : "");
    return path;
}

/* Split 'line' at tabs in place; returns the number of cells. */
static size_t split(char *line, char **cells, size_t max)
{
    size_t n = 0;
    char *p = line;
    while (n < max) {
        cells[n++] = p;
        char *tab = strchr(p, '\t');
        if (!tab)
            break;
        *tab = '\0';
        p = tab + 1;
    }
    return n;
}

static void test_starter_on_real_layer(void **state)
{
    (void)state;
    const char *in = getenv("ST_RULES_REAL_TSV");
    const char *outp = getenv("ST_RULES_REAL_OUT");
    if (!in || !outp)
        skip();
    FILE *fp = fopen(in, "r");
    FILE *out = fopen(outp, "w");
    assert_non_null(fp);
    assert_non_null(out);
    const char *paths[] = {starter_path()};
    st_diags d;
    st_diags_init(&d);
    st_rules *r = NULL;
    assert_int_equal(st_rules_load(paths, 1, &d, &r), ST_OK);
    st_rules_ctx *ctx = NULL;
    assert_int_equal(st_rules_ctx_new(r, &ctx), ST_OK);
    st_findings findings;
    st_findings_init(&findings);

    static char line[1 << 20];
    char *cells[512];
    assert_non_null(fgets(line, sizeof line, fp));
    line[strcspn(line, "\n")] = '\0';
    size_t ncols = split(line, cells, 512);
    st_fields layer;
    st_fields_init(&layer);
    for (size_t i = 0; i < ncols; i++) {
        uint32_t idx;
        assert_int_equal(st_fields_add(&layer, cells[i], ST_FIELD_TEXT, 0, 0, &idx), ST_OK);
    }
    for (uint32_t k = 0; k < st_rules_field_count(r); k++)
        fprintf(out, "%s%s\t%s_from\t%s_rule", k ? "\t" : "", st_rules_field(r, k)->name,
                st_rules_field(r, k)->name, st_rules_field(r, k)->name);
    fputc('\n', out);
    uint64_t row = 0;
    while (fgets(line, sizeof line, fp)) {
        line[strcspn(line, "\n")] = '\0';
        size_t n = split(line, cells, 512);
        assert_int_equal(n, ncols);
        st_feature *f = st_feature_new();
        assert_non_null(f);
        for (size_t i = 0; i < n; i++)
            if (strcmp(cells[i], "\\N") != 0)
                assert_int_equal(st_feature_set_value(f, (uint32_t)i, cells[i], strlen(cells[i])),
                                 ST_OK);
        f->bid = row++;
        f->area_m2 = 100;
        f->perimeter_m = 40;
        assert_int_equal(st_rules_apply(ctx, f, &layer, &findings), ST_OK);
        for (uint32_t k = 0; k < f->nschema; k++) {
            const st_field_value *v = &f->schema[k];
            if (v->text)
                assert_true(st_rules_field_accepts(r, k, v->text));
            assert_non_null(v->rule);
            fprintf(out, "%s%s\t%s\t%s", k ? "\t" : "", v->text ? v->text : "\\N",
                    st_provenance_name(v->from), v->rule);
        }
        fputc('\n', out);
        st_feature_free(f);
    }
    /* The unmapped values, most frequent first, after the rows. */
    st_unmapped_item *items;
    size_t n;
    assert_int_equal(st_unmapped_sorted(st_rules_ctx_unmapped(ctx), &items, &n), ST_OK);
    for (size_t i = 0; i < n; i++)
        fprintf(out, "#unmapped\t%s\t%s\t%llu\n", items[i].field, items[i].value,
                (unsigned long long)items[i].count);
    st_free(items);
    fprintf(out, "#findings\t%zu\n", findings.count);
    fclose(out);
    fclose(fp);
    st_fields_free(&layer);
    st_findings_free(&findings);
    st_rules_ctx_free(ctx);
    st_rules_free(r);
    st_diags_free(&d);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_starter_on_real_layer),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
