/*
** tests/unit/test_rules_parse.c -- the parser and checker: every statement
** parses into the data the API exposes; golden cases under
** tests/data/rules/ (NAME.rules with the exact expected diagnostics in
** NAME.expected); includes, cycles and limits; an allocation-failure loop
** over compiling rule sets (every failure is ST_ERR_NOMEM; leaks are caught
** by the ASan build and valgrind).
*/
#include <dirent.h>
#include <math.h>
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>
#include <cmocka.h>

#include "stocktake/rules.h"

/* The golden cases live beside this file's folder: tests/data/rules. */
static const char *data_dir(void)
{
    static char dir[4096];
    const char *here = __FILE__;   /* tests/unit/test_rules_parse.c */
    const char *slash = strrchr(here, '/');
    size_t n = slash ? (size_t)(slash - here) : 0;
    snprintf(dir, sizeof dir, "%.*s%s../data/rules", (int)n, here, n ? "/" : "");
    return dir;
}

static char *read_text(const char *path)
{
    FILE *fp = fopen(path, "rb");
    if (!fp)
        return NULL;
    st_buf b;
    st_buf_init(&b, 0);
    char chunk[4096];
    size_t n;
    while ((n = fread(chunk, 1, sizeof chunk, fp)) > 0)
        if (st_buf_append(&b, chunk, n) != ST_OK)
            break;
    fclose(fp);
    return st_buf_take(&b);
}

static char *render_all(const st_diags *d)
{
    st_buf b;
    st_buf_init(&b, 0);
    for (size_t i = 0; i < d->count; i++)
        assert_int_equal(st_diag_render(&d->items[i], &b), ST_OK);
    return st_buf_take(&b);
}

static const char every_statement[] =
    "# every statement once\n"
    "include \"inc/extra.rules\"\n"
    "schema\n"
    "  field occupancy codes RES, COM IND MIX UNK\n"
    "  field storeys integer 1..120\n"
    "  field height_m number 0..1000.5\n"
    "  field note text\n"
    "  unknown occupancy UNK\n"
    "end\n"
    "\n"
    "footprint\n"
    "  min-area 6 m2 warning\n"
    "  max-area 1000 ft2\n"
    "  overlap 50% error\n"
    "  repair make-valid\n"
    "end\n"
    "\n"
    "map occupancy from building, type ignoring case and accents mixed as MIX\n"
    "  house, \"R\xC3\xA9sidentiel\" -> RES\n"
    "  /^(shop|office)s?$/i -> COM\n"
    "  yes -> nothing\n"
    "end\n"
    "\n"
    "derive storeys\n"
    "  from building:levels accepting words, ground-plus\n"
    "  from max(1, round(height_m / 3 m)) when occupancy = RES\n"
    "end\n"
    "\n"
    "check\n"
    "  storeys > 30 and occupancy = RES -> warning \"tall residential\"\n"
    "  not (storeys is unknown) and area_m2 < 10 -> note \"small\"\n"
    "end\n"
    "\n"
    "defaults\n"
    "  in district OLD-* when occupancy = RES set storeys 2 70%, 3 30%\n"
    "  in region \"North\" set occupancy RES\n"
    "  everywhere set occupancy COM 25.5%, RES 74.5%\n"
    "  table \"inc/defaults.csv\"\n"
    "  learn storeys per district from 30 buildings\n"
    "end\n"
    "\n"
    "gate\n"
    "  fail when share(error) > 2%\n"
    "  warn when completeness(storeys) < 0.5\n"
    "  warn when observed(occupancy) <= 40%\n"
    "  fail when district-completeness < 60%\n"
    "end\n";

static st_rules *load_every(st_diags *d)
{
    char name[4200];
    snprintf(name, sizeof name, "%s/every.rules", data_dir());
    st_rules *r = NULL;
    st_diags_init(d);
    assert_int_equal(st_rules_load_text(name, every_statement, strlen(every_statement), d, &r),
                     ST_OK);
    return r;
}

static void test_every_statement(void **state)
{
    (void)state;
    st_diags d;
    st_rules *r = load_every(&d);
    assert_int_equal(d.errors, 0);
    assert_int_equal(d.warnings, 0);

    /* schema, including the field from the included file */
    assert_int_equal(st_rules_field_count(r), 5);
    const st_schema_field *f = st_rules_field(r, 0);
    assert_string_equal(f->name, "extra");
    f = st_rules_field(r, (uint32_t)st_rules_field_find(r, "occupancy"));
    assert_int_equal(f->kind, ST_KIND_CODE);
    assert_int_equal(f->ncodes, 5);
    assert_string_equal(f->codes[2], "IND");
    assert_string_equal(f->unknown, "UNK");
    assert_string_equal(f->unknown_rule + strlen(f->unknown_rule) - 13, "every.rules:8");
    f = st_rules_field(r, (uint32_t)st_rules_field_find(r, "height_m"));
    assert_int_equal(f->kind, ST_KIND_REAL);
    assert_true(f->has_range && f->min == 0 && f->max == 1000.5);
    assert_null(f->unknown);
    assert_int_equal(st_rules_field(r, 4)->kind, ST_KIND_TEXT);
    assert_true(st_rules_field_accepts(r, 2, "120"));
    assert_false(st_rules_field_accepts(r, 2, "121"));
    assert_false(st_rules_field_accepts(r, 2, "2.5"));
    assert_false(st_rules_field_accepts(r, 1, "RESS"));

    /* footprint settings, in SI units */
    assert_int_equal(st_rules_setting_count(r), 4);
    const st_rule_setting *s = st_rules_setting_find(r, "min-area");
    assert_true(s->has_number && s->number == 6 && s->si == 6);
    assert_string_equal(s->unit, "m2");
    assert_string_equal(s->unit_si, "m2");
    assert_int_equal(s->severity, ST_SEV_WARNING);
    s = st_rules_setting_find(r, "max-area");
    assert_true(fabs(s->si - 92.90304) < 1e-9);   /* 1000 ft2, 1 ft = 0.3048 m */
    assert_false(s->has_severity);
    s = st_rules_setting_find(r, "overlap");
    assert_true(s->si == 0.5);
    assert_string_equal(s->unit_si, "ratio");
    assert_int_equal(s->severity, ST_SEV_ERROR);
    s = st_rules_setting_find(r, "repair");
    assert_false(s->has_number);
    assert_string_equal(s->word, "make-valid");

    /* defaults */
    assert_int_equal(st_rules_default_count(r), 3);
    const st_default_rule *dr = st_rules_default(r, 0);
    assert_int_equal(dr->scope, ST_SCOPE_DISTRICT);
    assert_string_equal(dr->pattern, "OLD-*");
    assert_non_null(dr->when);
    assert_int_equal(dr->nchoices, 2);
    assert_string_equal(dr->choices[0].value, "2");
    assert_true(fabs(dr->choices[0].share - 0.7) < 1e-12);
    dr = st_rules_default(r, 1);
    assert_int_equal(dr->scope, ST_SCOPE_REGION);
    assert_string_equal(dr->pattern, "North");
    assert_true(dr->nchoices == 1 && dr->choices[0].share == 1.0);
    assert_int_equal(st_rules_default(r, 2)->scope, ST_SCOPE_EVERYWHERE);
    assert_null(st_rules_default(r, 2)->pattern);
    assert_int_equal(st_rules_table_count(r), 1);
    assert_string_equal(st_rules_table(r, 0)->path + strlen(st_rules_table(r, 0)->path) - 16,
                        "inc/defaults.csv");
    assert_int_equal(st_rules_learn_count(r), 1);
    assert_int_equal(st_rules_learn(r, 0)->min_count, 30);
    assert_int_equal(st_rules_learn(r, 0)->per, ST_SCOPE_DISTRICT);

    /* gates */
    assert_int_equal(st_rules_gate_count(r), 4);
    const st_gate_rule *g = st_rules_gate(r, 0);
    assert_int_equal(g->action, ST_GATE_FAIL);
    assert_int_equal(g->metric, ST_METRIC_SHARE);
    assert_int_equal(g->severity, ST_SEV_ERROR);
    assert_true(fabs(g->threshold - 0.02) < 1e-12);
    assert_string_equal(g->text, "share(error) > 2%");
    assert_true(st_rules_gate_holds(g, 0.03));
    assert_false(st_rules_gate_holds(g, 0.02));
    g = st_rules_gate(r, 1);
    assert_int_equal(g->metric, ST_METRIC_COMPLETENESS);
    assert_int_equal(g->field, st_rules_field_find(r, "storeys"));
    assert_int_equal(st_rules_gate(r, 2)->metric, ST_METRIC_OBSERVED);
    assert_int_equal(st_rules_gate(r, 3)->metric, ST_METRIC_DISTRICT_COMPLETENESS);

    assert_true(st_rules_glob("OLD-*", "old-town"));
    assert_true(st_rules_glob("*", ""));
    assert_true(st_rules_glob("D?", "D7"));
    assert_false(st_rules_glob("OLD-*", "NEW-1"));
    st_rules_free(r);
    st_diags_free(&d);
}

/* Every NAME.rules in tests/data/rules gives exactly NAME.expected. */
static void test_golden_cases(void **state)
{
    (void)state;
    char cwd[4096];
    assert_non_null(getcwd(cwd, sizeof cwd));
    assert_int_equal(chdir(data_dir()), 0);
    DIR *dir = opendir(".");
    assert_non_null(dir);
    struct dirent *e;
    int cases = 0, failed = 0;
    while ((e = readdir(dir))) {
        size_t n = strlen(e->d_name);
        if (n < 7 || strcmp(e->d_name + n - 6, ".rules") != 0)
            continue;
        char expected_path[512];
        snprintf(expected_path, sizeof expected_path, "%.*s.expected", (int)(n - 6), e->d_name);
        char *want = read_text(expected_path);
        if (!want) {
            fprintf(stderr, "golden case %s has no %s\n", e->d_name, expected_path);
            failed++;
            continue;
        }
        st_diags d;
        st_diags_init(&d);
        st_rules *r = NULL;
        const char *paths[] = {e->d_name};
        st_status rc = st_rules_load(paths, 1, &d, &r);
        char *got = render_all(&d);
        int want_error = strstr(want, ": error: ") != NULL;
        if (strcmp(got, want) != 0 || (rc != ST_OK) != want_error ||
            (rc == ST_OK) != (r != NULL)) {
            fprintf(stderr, "golden case %s differs (status %s):\n--- expected\n%s--- got\n%s",
                    e->d_name, st_status_name(rc), want, got);
            failed++;
        }
        cases++;
        st_free(got);
        st_free(want);
        st_rules_free(r);
        st_diags_free(&d);
    }
    closedir(dir);
    assert_int_equal(chdir(cwd), 0);
    assert_true(cases >= 40);
    assert_int_equal(failed, 0);
}

static st_status load_string(const char *text, st_diags *d, st_rules **r)
{
    st_diags_init(d);
    return st_rules_load_text("t.rules", text, strlen(text), d, r);
}

static void test_too_many_errors_stops(void **state)
{
    (void)state;
    st_buf b;
    st_buf_init(&b, 0);
    for (int i = 0; i < 80; i++)
        assert_int_equal(st_buf_puts(&b, "bogus line\n"), ST_OK);
    st_diags d;
    st_rules *r = NULL;
    assert_int_equal(load_string(b.data, &d, &r), ST_ERR_RULE);
    assert_null(r);
    assert_int_equal(d.errors, ST_RULES_MAX_ERRORS);
    assert_string_equal(d.items[d.count - 1].message, "too many errors (50); stopping here");
    st_diags_free(&d);
    st_buf_free(&b);
}

static void test_depth_limit(void **state)
{
    (void)state;
    st_buf b;
    st_buf_init(&b, 0);
    assert_int_equal(st_buf_puts(&b, "schema\n field s integer\nend\ncheck\n  "), ST_OK);
    for (int i = 0; i < 100; i++)
        assert_int_equal(st_buf_puts(&b, "("), ST_OK);
    assert_int_equal(st_buf_puts(&b, "s"), ST_OK);
    for (int i = 0; i < 100; i++)
        assert_int_equal(st_buf_puts(&b, ")"), ST_OK);
    assert_int_equal(st_buf_puts(&b, " > 1 -> note \"deep\"\nend\n"), ST_OK);
    st_diags d;
    st_rules *r = NULL;
    assert_int_equal(load_string(b.data, &d, &r), ST_ERR_RULE);
    assert_int_equal(d.count, 1);
    assert_int_equal(d.items[0].code, ST_ERR_LIMIT);
    assert_string_equal(d.items[0].message, "expression nests deeper than the limit of 64");
    st_diags_free(&d);
    st_buf_free(&b);
}

static void test_rule_count_limit(void **state)
{
    (void)state;
    st_buf b;
    st_buf_init(&b, 0);
    assert_int_equal(st_buf_puts(&b, "schema\n field o codes A\nend\nmap o from t\n"), ST_OK);
    for (int i = 0; i <= ST_RULES_MAX_RULES; i++)
        assert_int_equal(st_buf_printf(&b, "v%d -> A\n", i), ST_OK);
    assert_int_equal(st_buf_puts(&b, "end\n"), ST_OK);
    st_diags d;
    st_rules *r = NULL;
    st_status rc = load_string(b.data, &d, &r);
    assert_int_equal(rc, ST_ERR_RULE);
    assert_int_equal(d.items[0].code, ST_ERR_LIMIT);
    assert_string_equal(d.items[0].message, "more than 100000 rule lines in the set");
    st_diags_free(&d);
    st_buf_free(&b);
}

static void test_file_size_limit(void **state)
{
    (void)state;
    size_t n = ST_RULES_MAX_FILE_BYTES + 1;
    char *text = malloc(n);
    assert_non_null(text);
    memset(text, '\n', n);
    st_diags d;
    st_rules *r = NULL;
    st_diags_init(&d);
    assert_int_equal(st_rules_load_text("big.rules", text, n, &d, &r), ST_ERR_LIMIT);
    assert_null(r);
    assert_string_equal(d.items[0].message, "rule text is larger than the limit of 4 MiB");
    free(text);
    st_diags_free(&d);
}

/* A chain of includes one deeper than the limit. */
static void test_include_depth_limit(void **state)
{
    (void)state;
    char dir[] = "/tmp/st-rules-XXXXXX";
    assert_non_null(mkdtemp(dir));
    char path[256];
    for (int i = 0; i <= ST_RULES_MAX_INCLUDE_DEPTH + 1; i++) {
        snprintf(path, sizeof path, "%s/f%d.rules", dir, i);
        FILE *fp = fopen(path, "w");
        assert_non_null(fp);
        fprintf(fp, "include \"f%d.rules\"\n", i + 1);
        fclose(fp);
    }
    snprintf(path, sizeof path, "%s/f0.rules", dir);
    const char *paths[] = {path};
    st_diags d;
    st_diags_init(&d);
    st_rules *r = NULL;
    assert_int_equal(st_rules_load(paths, 1, &d, &r), ST_ERR_RULE);
    assert_int_equal(d.errors, 1);
    assert_int_equal(d.items[0].code, ST_ERR_LIMIT);
    assert_string_equal(d.items[0].message, "includes nest deeper than the limit of 16");
    assert_int_equal(d.items[0].line, 1);
    st_diags_free(&d);
    for (int i = 0; i <= ST_RULES_MAX_INCLUDE_DEPTH + 1; i++) {
        snprintf(path, sizeof path, "%s/f%d.rules", dir, i);
        unlink(path);
    }
    rmdir(dir);
}

static void test_missing_file(void **state)
{
    (void)state;
    const char *paths[] = {"/nonexistent/x.rules"};
    st_diags d;
    st_diags_init(&d);
    st_rules *r = NULL;
    assert_int_equal(st_rules_load(paths, 1, &d, &r), ST_ERR_IO);
    assert_null(r);
    assert_string_equal(d.items[0].file, "/nonexistent/x.rules");
    st_diags_free(&d);
}

/* Two files as one set; a file included twice (a diamond) is read once. */
static void test_two_files_and_diamond(void **state)
{
    (void)state;
    char a[4200], b[4200];
    snprintf(a, sizeof a, "%s/inc/diamond-a.rules", data_dir());
    snprintf(b, sizeof b, "%s/inc/diamond-b.rules", data_dir());
    const char *paths[] = {a, b, a};
    st_diags d;
    st_diags_init(&d);
    st_rules *r = NULL;
    assert_int_equal(st_rules_load(paths, 3, &d, &r), ST_OK);
    assert_int_equal(d.count, 0);
    assert_int_equal(st_rules_field_count(r), 3);
    st_rules_free(r);
    st_diags_free(&d);
}

/* Fail each allocation in turn while compiling: ST_ERR_NOMEM every time
** until the compile needs no more; no leaks (ASan, valgrind). */
static void alloc_loop(const char *name, const char *text, int regex)
{
    for (long n = 1;; n++) {
        st_diags d;
        st_diags_init(&d);
        st_rules *r = NULL;
        st_alloc_fail_after(n);
        st_status rc = st_rules_load_text(name, text, strlen(text), &d, &r);
        long count = st_alloc_count();
        st_alloc_fail_after(0);
        if (count < n) {
            assert_int_equal(rc, ST_OK);
            assert_non_null(r);
            st_rules_free(r);
            st_diags_free(&d);
            assert_true(n > 10);
            break;
        }
        /* The JIT is optional: its failure leaves the interpreter. */
        if (!(regex && rc == ST_OK)) {
            if (rc != ST_ERR_NOMEM)
                fail_msg("allocation %ld: status %s, expected nomem", n, st_status_name(rc));
            assert_null(r);
        }
        st_rules_free(r);
        st_diags_free(&d);
    }
}

static void test_allocation_failures(void **state)
{
    (void)state;
    static const char plain[] =
        "schema\n  field o codes RES COM UNK\n  field s integer 1..9\n  unknown o UNK\nend\n"
        "footprint\n  min-area 6 m2 warning\nend\n"
        "map o from building ignoring case and accents mixed as COM\n"
        "  house, \"R\xC3\xA9sidentiel\" -> RES\n  yes -> nothing\nend\n"
        "derive s\n  from levels\n  from round(height / 3 m) when o = RES\nend\n"
        "check\n  s > 5 and o = RES -> warning \"tall\"\nend\n"
        "defaults\n  in district A* set s 2 50%, 3 50%\n  learn s per region from 5 buildings\nend\n"
        "gate\n  fail when share(error) > 2%\nend\n";
    alloc_loop("plain.rules", plain, 0);
    static const char withregex[] =
        "schema\n  field o codes RES COM\nend\n"
        "map o from b\n  /^(shop|office)s?$/i -> COM\n  shop -> RES\nend\n";
    alloc_loop("regex.rules", withregex, 1);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_every_statement),
        cmocka_unit_test(test_golden_cases),
        cmocka_unit_test(test_too_many_errors_stops),
        cmocka_unit_test(test_depth_limit),
        cmocka_unit_test(test_rule_count_limit),
        cmocka_unit_test(test_file_size_limit),
        cmocka_unit_test(test_include_depth_limit),
        cmocka_unit_test(test_missing_file),
        cmocka_unit_test(test_two_files_and_diamond),
        cmocka_unit_test(test_allocation_failures),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
