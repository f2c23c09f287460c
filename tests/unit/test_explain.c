/*
** tests/unit/test_explain.c -- reading one building back (explain.h).
**
** Fixtures: the group setup runs the pipeline on tests/data/explain
** (tiny.geojson with tiny.rules, and the same layer without rules) into a
** temporary folder, as GeoPackage and as GeoJSON. The expected provenance
** comes from the rule text itself (the line that holds a given statement),
** not from numbers written here. Also: rule-line lookup edge cases, and an
** allocation-failure loop over loading and rendering.
** $ST_TEST_DATA overrides "tests/data" (make runs tests from the checkout).
*/
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <cmocka.h>

#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#include "stocktake/core.h"
#include "stocktake/explain.h"
#include "stocktake/pipeline.h"
#include "scratch.h"

typedef struct fixture {
    char dir[64];
    char rules[256], layer[256];
    char gpkg[128], geojson[128], plain[128];
} fixture;

static void data_path(char *buf, size_t n, const char *name)
{
    const char *root = getenv("ST_TEST_DATA");
    snprintf(buf, n, "%s/explain/%s", root ? root : "tests/data", name);
}

static int run_to(const char *layer, const char *rules, const char *out)
{
    const char *inputs[1] = {layer};
    const char *rl[1] = {rules};
    st_run_options opt;
    memset(&opt, 0, sizeof opt);
    opt.inputs = inputs;
    opt.ninputs = 1;
    opt.rules = rl;
    opt.nrules = rules ? 1 : 0;
    opt.output = out;
    st_diags d;
    st_diags_init(&d);
    st_run_result *res = NULL;
    st_status rc = st_run_execute(&opt, &d, &res);
    st_run_result_free(res);
    st_diags_free(&d);
    return rc == ST_OK;
}

static int group_setup(void **state)
{
    fixture *fx = calloc(1, sizeof *fx);
    if (!fx)
        return -1;
    snprintf(fx->dir, sizeof fx->dir, "%s/st_explain_XXXXXX",
             getenv("TMPDIR") ? getenv("TMPDIR") : "/tmp");
    if (!mkdtemp(fx->dir))
        return -1;
    data_path(fx->rules, sizeof fx->rules, "tiny.rules");
    data_path(fx->layer, sizeof fx->layer, "tiny.geojson");
    snprintf(fx->gpkg, sizeof fx->gpkg, "%s/out.gpkg", fx->dir);
    snprintf(fx->geojson, sizeof fx->geojson, "%s/out.geojson", fx->dir);
    snprintf(fx->plain, sizeof fx->plain, "%s/plain.gpkg", fx->dir);
    if (!run_to(fx->layer, fx->rules, fx->gpkg) || !run_to(fx->layer, fx->rules, fx->geojson) ||
        !run_to(fx->layer, NULL, fx->plain))
        return -1;
    *state = fx;
    return 0;
}

static int group_teardown(void **state)
{
    fixture *fx = *state;
    if (scratch_remove(fx->dir) != 0)
        return -1;
    free(fx);
    return 0;
}

/* "rules:N" where line N of the rule file is the first holding 'text'. */
static void rule_of(const fixture *fx, const char *text, char *out, size_t n)
{
    FILE *f = fopen(fx->rules, "r");
    assert_non_null(f);
    char line[512];
    int k = 0, found = 0;
    while (!found && fgets(line, sizeof line, f)) {
        k++;
        found = strstr(line, text) != NULL;
    }
    fclose(f);
    assert_true(found);
    snprintf(out, n, "%s:%d", fx->rules, k);
}

static const st_explain_field *field(const st_explanation *e, const char *name)
{
    for (size_t i = 0; i < e->nfields; i++)
        if (!strcmp(e->fields[i].name, name))
            return &e->fields[i];
    fail_msg("no field %s", name);
    return NULL;
}

static void check_house(const fixture *fx, const char *path)
{
    st_diags d;
    st_diags_init(&d);
    st_explanation *e = NULL;
    assert_int_equal(st_explain_load(path, 1, &d, &e), ST_OK);
    assert_int_equal(d.count, 0);
    assert_int_equal(e->set_aside, 0);
    assert_string_equal(e->status, "ok");
    assert_int_equal(e->nfields, 3);
    char want[300];
    const st_explain_field *f = field(e, "occupancy");
    rule_of(fx, "house, apartments", want, sizeof want);
    assert_string_equal(f->value, "RES");
    assert_string_equal(f->from, "source");
    assert_string_equal(f->rule, want);
    assert_string_equal(f->rule_text, "house, apartments  -> RES");
    f = field(e, "storeys");
    rule_of(fx, "from levels", want, sizeof want);
    assert_string_equal(f->from, "derived");
    assert_string_equal(f->rule, want);
    assert_string_equal(f->rule_text, "from levels");
    /* own columns end before the first field; sources after the last */
    assert_string_equal(e->own[0].name, "bid");
    assert_string_equal(e->own[e->nown - 1].name, "district");
    assert_int_equal(e->nsource, 3);
    assert_string_equal(e->source[0].name, "building");
    assert_string_equal(e->source[1].name, "levels");
    assert_true(e->source[1].numeric);
    assert_int_equal(e->nfindings, 1);
    assert_string_equal(e->findings[0].code, "dup.exact");
    st_explanation_free(e);
    st_diags_free(&d);
}

static void test_gpkg_house(void **state)
{
    fixture *fx = *state;
    check_house(fx, fx->gpkg);
}

static void test_geojson_house(void **state)
{
    fixture *fx = *state;
    check_house(fx, fx->geojson);
}

/* Without rules there is no triple to mark the layout: the source
** attributes start after our own leading columns. */
static void test_without_rules(void **state)
{
    fixture *fx = *state;
    st_diags d;
    st_diags_init(&d);
    st_explanation *e = NULL;
    assert_int_equal(st_explain_load(fx->plain, 1, &d, &e), ST_OK);
    assert_int_equal(e->nfields, 0);
    assert_string_equal(e->own[e->nown - 1].name, "district");
    assert_int_equal(e->nsource, 3);
    assert_string_equal(e->source[2].name, "name");
    assert_string_equal(e->source[2].value, "Mill House");
    st_explanation_free(e);
    st_diags_free(&d);
}

static void test_set_aside_and_missing(void **state)
{
    fixture *fx = *state;
    st_diags d;
    st_diags_init(&d);
    st_explanation *e = NULL;
    assert_int_equal(st_explain_load(fx->gpkg, 3, &d, &e), ST_OK);
    assert_int_equal(e->set_aside, 1);
    assert_string_equal(e->status, "duplicate");
    assert_string_equal(e->duplicate_of, "1");
    assert_non_null(strstr(e->reason, "exact duplicate of building 1"));
    assert_int_equal(e->nfields, 0);
    st_explanation_free(e);
    assert_int_equal(st_explain_load(fx->gpkg, 5, &d, &e), ST_ERR_USAGE);
    assert_null(e);
    assert_int_equal(d.count, 1);
    assert_non_null(strstr(d.items[0].message, "bids run from 1 to 4"));
    assert_int_equal(st_explain_load(fx->layer, 1, &d, &e), ST_ERR_FORMAT);
    assert_int_equal(st_explain_load(fx->rules, 1, &d, &e), ST_ERR_FORMAT);
    char missing[128];
    snprintf(missing, sizeof missing, "%s/none.gpkg", fx->dir);
    assert_int_equal(st_explain_load(missing, 1, &d, &e), ST_ERR_IO);
    assert_int_equal(d.errors, 4);
    st_diags_free(&d);
}

static void write_file(const char *path, const char *text)
{
    FILE *f = fopen(path, "wb");
    assert_non_null(f);
    fputs(text, f);
    fclose(f);
}

static void expect_rule_text(const char *rule, const char *want)
{
    char *got = NULL;
    assert_int_equal(st_explain_rule_text(rule, &got), ST_OK);
    if (!want)
        assert_null(got);
    else
        assert_string_equal(got, want);
    st_free(got);
}

static void test_rule_text_edges(void **state)
{
    fixture *fx = *state;
    char path[128], rule[160];
    snprintf(path, sizeof path, "%s/a:b.rules", fx->dir);   /* ':' in the name */
    write_file(path, "one\r\n  two\t \r\n\nlast without newline");
    snprintf(rule, sizeof rule, "%s:2", path);
    expect_rule_text(rule, "two");
    snprintf(rule, sizeof rule, "%s:3", path);
    expect_rule_text(rule, "");
    snprintf(rule, sizeof rule, "%s:4", path);
    expect_rule_text(rule, "last without newline");
    snprintf(rule, sizeof rule, "%s:5", path);
    expect_rule_text(rule, NULL);
    snprintf(rule, sizeof rule, "%s:0", path);
    expect_rule_text(rule, NULL);
    snprintf(rule, sizeof rule, "%s:x", path);
    expect_rule_text(rule, NULL);
    expect_rule_text(path, NULL);                     /* "a:b.rules" has no line */
    expect_rule_text("/no/such/file.rules:1", NULL);
    expect_rule_text(NULL, NULL);
    expect_rule_text(":3", NULL);
}

static void test_render(void **state)
{
    fixture *fx = *state;
    st_diags d;
    st_diags_init(&d);
    st_explanation *e = NULL;
    assert_int_equal(st_explain_load(fx->gpkg, 4, &d, &e), ST_OK);
    st_buf b;
    st_buf_init(&b, 0);
    assert_int_equal(st_explain_render_text(e, &b), ST_OK);
    assert_non_null(strstr(b.data, "findings (1):\n  warning  rule.check  tall for this town"));
    st_buf_clear(&b);
    assert_int_equal(st_explain_render_json(e, &b), ST_OK);
    assert_non_null(strstr(b.data, "\"found_in\": \"buildings\""));
    assert_non_null(strstr(b.data, "\"levels\": 12"));
    assert_non_null(strstr(b.data, "\"storeys\",\n      \"value\": \"12\""));
    st_buf_free(&b);
    st_explanation_free(e);
    st_diags_free(&d);
}

/* Every allocation failure gives ST_ERR_NOMEM and leaks nothing (ASan). */
static void nomem_loop(const char *path, uint64_t bid)
{
    long n;
    for (n = 1; n < 100000; n++) {
        st_diags d;
        st_diags_init(&d);
        st_explanation *e = NULL;
        st_buf b;
        st_buf_init(&b, 0);
        st_alloc_fail_after(n);
        st_status rc = st_explain_load(path, bid, &d, &e);
        if (rc == ST_OK)
            rc = st_explain_render_text(e, &b);
        if (rc == ST_OK)
            rc = st_explain_render_json(e, &b);
        long used = st_alloc_count();
        st_alloc_fail_after(0);
        st_buf_free(&b);
        st_explanation_free(e);
        st_diags_free(&d);
        if (rc == ST_OK && used < n)
            break;
        if (rc == ST_OK)
            continue;   /* a failure someone absorbs (the reader's CRS name) */
        if (rc != ST_ERR_NOMEM)
            fail_msg("allocation %ld failed: status %d", n, rc);
    }
    assert_true(n > 20);
}

static void test_nomem(void **state)
{
    fixture *fx = *state;
    nomem_loop(fx->gpkg, 1);
    nomem_loop(fx->geojson, 3);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_gpkg_house),
        cmocka_unit_test(test_geojson_house),
        cmocka_unit_test(test_without_rules),
        cmocka_unit_test(test_set_aside_and_missing),
        cmocka_unit_test(test_rule_text_edges),
        cmocka_unit_test(test_render),
        cmocka_unit_test(test_nomem),
    };
    return cmocka_run_group_tests_name("explain", tests, group_setup, group_teardown);
}
