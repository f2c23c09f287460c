/*
** tests/unit/test_rules_eval.c -- the evaluator: map (exact, caseless,
** accent-insensitive, regex, multi-valued, says nothing, first match
** wins), derive (units, ranges, lists, words, "R+2", the floating-point
** trap of REFERENCES.md section 7), checks, precedence and provenance
** ("file:line") of every field, unknown values, unmapped counts, the
** hostile regex under PCRE2 limits, the starter pack, and an
** allocation-failure loop over evaluation.
*/
#include <math.h>
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <cmocka.h>

#include "rules/rulesInt.h"

/* ---- fixture: one rule set, a layer and features built by hand -------- */

typedef struct fx {
    st_rules *rules;
    st_rules_ctx *ctx;
    st_fields layer;
    st_findings findings;
    st_diags diags;
} fx;

static void fx_open(fx *x, const char *text, const char *const *fields)
{
    memset(x, 0, sizeof *x);
    st_diags_init(&x->diags);
    st_status rc = st_rules_load_text("t.rules", text, strlen(text), &x->diags, &x->rules);
    if (rc != ST_OK) {
        st_buf b;
        st_buf_init(&b, 0);
        for (size_t i = 0; i < x->diags.count; i++)
            if (st_diag_render(&x->diags.items[i], &b) != ST_OK)
                break;
        fail_msg("rules do not load (%s):\n%s", st_status_name(rc), b.data ? b.data : "");
    }
    assert_int_equal(st_rules_ctx_new(x->rules, &x->ctx), ST_OK);
    st_fields_init(&x->layer);
    for (size_t i = 0; fields[i]; i++) {
        uint32_t idx;
        assert_int_equal(st_fields_add(&x->layer, fields[i], ST_FIELD_TEXT, 0, 0, &idx), ST_OK);
    }
    st_findings_init(&x->findings);
}

static void fx_close(fx *x)
{
    st_rules_ctx_free(x->ctx);
    st_rules_free(x->rules);
    st_fields_free(&x->layer);
    st_findings_free(&x->findings);
    st_diags_free(&x->diags);
}

/* A feature with values for the layer's fields (NULL = missing). */
static st_feature *feature(fx *x, const char *const *values)
{
    st_feature *f = st_feature_new();
    assert_non_null(f);
    for (uint32_t i = 0; i < x->layer.count; i++)
        if (values[i])
            assert_int_equal(st_feature_set_value(f, i, values[i], strlen(values[i])), ST_OK);
    f->area_m2 = 120.0;
    f->perimeter_m = 44.0;
    f->bid = 7;
    return f;
}

static const st_field_value *apply(fx *x, st_feature *f, const char *field)
{
    assert_int_equal(st_rules_apply(x->ctx, f, &x->layer, &x->findings), ST_OK);
    int32_t i = st_rules_field_find(x->rules, field);
    assert_true(i >= 0);
    assert_int_equal(f->nschema, st_rules_field_count(x->rules));
    return &f->schema[i];
}

/* Apply to a one-attribute feature and return field 'field'. */
static void expect_one(fx *x, const char *value, const char *field, const char *text,
                       st_provenance from, const char *rule)
{
    const char *values[8] = {value, NULL};
    st_feature *f = feature(x, values);
    const st_field_value *v = apply(x, f, field);
    if (text) {
        if (!v->text || strcmp(v->text, text))
            fail_msg("'%s': %s is '%s', expected '%s'", value ? value : "(missing)", field,
                     v->text ? v->text : "(null)", text);
    } else {
        assert_null(v->text);
    }
    assert_int_equal(v->from, from);
    if (rule)
        assert_string_equal(v->rule, rule);
    st_feature_free(f);
}

static uint64_t unmapped(fx *x, const char *field, const char *value)
{
    st_unmapped_item *items;
    size_t n;
    assert_int_equal(st_unmapped_sorted(st_rules_ctx_unmapped(x->ctx), &items, &n), ST_OK);
    uint64_t c = 0;
    for (size_t i = 0; i < n; i++)
        if (!strcmp(items[i].field, field) && !strcmp(items[i].value, value))
            c = items[i].count;
    st_free(items);
    return c;
}

/* ---- map ------------------------------------------------------------------ */

static const char map_rules[] =
    "schema\n"                                                       /* 1 */
    "  field occupancy codes RES COM IND MIX UNK\n"                  /* 2 */
    "  unknown occupancy UNK\n"                                      /* 3 */
    "end\n"                                                          /* 4 */
    "map occupancy from building ignoring case and accents\n"        /* 5 */
    "  house, \"R\xC3\xA9sidentiel\", \xD0\xB4\xD0\xBE\xD0\xBC -> RES\n" /* 6 */
    "  /^(shop|retail|office)s?$/ -> COM\n"                          /* 7 */
    "  /^usine/ -> IND\n"                                            /* 8 */
    "  yes -> nothing\n"                                             /* 9 */
    "end\n";                                                         /* 10 */

static void test_map_exact_caseless_accents(void **state)
{
    (void)state;
    fx x;
    const char *fields[] = {"building", NULL};
    fx_open(&x, map_rules, fields);
    expect_one(&x, "house", "occupancy", "RES", ST_PROV_SOURCE, "t.rules:6");
    expect_one(&x, "HOUSE", "occupancy", "RES", ST_PROV_SOURCE, "t.rules:6");
    expect_one(&x, "  House ", "occupancy", "RES", ST_PROV_SOURCE, "t.rules:6");
    expect_one(&x, "residentiel", "occupancy", "RES", ST_PROV_SOURCE, "t.rules:6");
    expect_one(&x, "R\xC3\x89SIDENTIEL", "occupancy", "RES", ST_PROV_SOURCE, "t.rules:6");
    /* Cyrillic ДОМ, matched case-insensitively */
    expect_one(&x, "\xD0\x94\xD0\x9E\xD0\x9C", "occupancy", "RES", ST_PROV_SOURCE, "t.rules:6");
    /* regexes run caseless in a block that ignores case */
    expect_one(&x, "Shops", "occupancy", "COM", ST_PROV_SOURCE, "t.rules:7");
    /* ... and on the accent-stripped text: "Usiné" */
    expect_one(&x, "Usin\xC3\xA9", "occupancy", "IND", ST_PROV_SOURCE, "t.rules:8");
    /* says nothing: unknown, and not listed as unmapped */
    expect_one(&x, "yes", "occupancy", "UNK", ST_PROV_UNKNOWN, "t.rules:3");
    assert_int_equal(unmapped(&x, "occupancy", "yes"), 0);
    /* no line: unknown and counted */
    expect_one(&x, "barn", "occupancy", "UNK", ST_PROV_UNKNOWN, "t.rules:3");
    expect_one(&x, "barn", "occupancy", "UNK", ST_PROV_UNKNOWN, "t.rules:3");
    assert_int_equal(unmapped(&x, "occupancy", "barn"), 2);
    /* missing and empty attribute: unknown, not counted */
    expect_one(&x, NULL, "occupancy", "UNK", ST_PROV_UNKNOWN, "t.rules:3");
    expect_one(&x, "  ", "occupancy", "UNK", ST_PROV_UNKNOWN, "t.rules:3");
    assert_int_equal(st_unmapped_size(st_rules_ctx_unmapped(x.ctx)), 1);
    fx_close(&x);
}

static void test_map_exact_is_exact(void **state)
{
    (void)state;
    fx x;
    const char *fields[] = {"building", NULL};
    fx_open(&x,
            "schema\n  field o codes RES UNK\nend\n"
            "map o from building\n  house, \"R\xC3\xA9sidentiel\" -> RES\nend\n",
            fields);
    expect_one(&x, "house", "o", "RES", ST_PROV_SOURCE, "t.rules:5");
    expect_one(&x, "House", "o", NULL, ST_PROV_UNKNOWN, "t.rules:2");
    expect_one(&x, "residentiel", "o", NULL, ST_PROV_UNKNOWN, NULL);
    expect_one(&x, "R\xC3\xA9sidentiel", "o", "RES", ST_PROV_SOURCE, NULL);
    /* only accents ignored: case still counts */
    fx_close(&x);
    fx_open(&x,
            "schema\n  field o codes RES UNK\nend\n"
            "map o from building ignoring accents\n  \"R\xC3\xA9sidentiel\" -> RES\nend\n",
            fields);
    expect_one(&x, "Residentiel", "o", "RES", ST_PROV_SOURCE, NULL);
    expect_one(&x, "residentiel", "o", NULL, ST_PROV_UNKNOWN, NULL);
    fx_close(&x);
}

static void test_map_first_match_wins(void **state)
{
    (void)state;
    fx x;
    const char *fields[] = {"building", NULL};
    fx_open(&x,
            "schema\n  field o codes A B C\nend\n"
            "map o from building\n"
            "  /^shop/ -> A\n"       /* 5 */
            "  shopping -> B\n"      /* 6: reachable? 'shopping' matches line 5 first */
            "  kiosk -> B\n"         /* 7 */
            "  /^k/ -> C\n"          /* 8 */
            "end\n",
            fields);
    assert_int_equal(x.diags.warnings, 1);   /* line 6 is unreachable */
    expect_one(&x, "shopping", "o", "A", ST_PROV_SOURCE, "t.rules:5");
    expect_one(&x, "kiosk", "o", "B", ST_PROV_SOURCE, "t.rules:7");
    expect_one(&x, "kebab", "o", "C", ST_PROV_SOURCE, "t.rules:8");
    fx_close(&x);
}

static void test_map_multi_valued(void **state)
{
    (void)state;
    fx x;
    const char *fields[] = {"building", NULL};
    static const char text[] =
        "schema\n  field o codes RES COM MIX UNK\n  unknown o UNK\nend\n"
        "map o from building%s\n"     /* 5 */
        "  residential, house -> RES\n"  /* 6 */
        "  retail -> COM\n"              /* 7 */
        "  \"retail;office\" -> COM\n"   /* 8: a whole value matched as is */
        "  yes -> nothing\n"             /* 9 */
        "end\n";
    char buf[512];
    /* Without 'mixed as': the first part that maps wins. */
    snprintf(buf, sizeof buf, text, "");
    fx_open(&x, buf, fields);
    expect_one(&x, "residential;retail", "o", "RES", ST_PROV_SOURCE, "t.rules:6");
    expect_one(&x, "retail; residential", "o", "COM", ST_PROV_SOURCE, "t.rules:7");
    expect_one(&x, "yes;retail", "o", "COM", ST_PROV_SOURCE, "t.rules:7");
    expect_one(&x, "barn;retail", "o", "COM", ST_PROV_SOURCE, "t.rules:7");
    expect_one(&x, "retail;office", "o", "COM", ST_PROV_SOURCE, "t.rules:8");
    expect_one(&x, "yes;yes", "o", "UNK", ST_PROV_UNKNOWN, NULL);
    expect_one(&x, "barn;shed", "o", "UNK", ST_PROV_UNKNOWN, NULL);
    assert_int_equal(unmapped(&x, "o", "barn;shed"), 1);
    assert_int_equal(unmapped(&x, "o", "yes;yes"), 0);
    fx_close(&x);
    /* With 'mixed as MIX': parts mapping to different codes give MIX. */
    snprintf(buf, sizeof buf, text, " mixed as MIX");
    fx_open(&x, buf, fields);
    expect_one(&x, "residential;retail", "o", "MIX", ST_PROV_SOURCE, "t.rules:5");
    expect_one(&x, "residential;house", "o", "RES", ST_PROV_SOURCE, "t.rules:6");
    expect_one(&x, "yes;retail", "o", "COM", ST_PROV_SOURCE, "t.rules:7");
    fx_close(&x);
}

/* Alternative source attributes; a layer's names matched without case. */
static void test_map_sources(void **state)
{
    (void)state;
    fx x;
    const char *fields[] = {"TYPE", "amenity", NULL};
    fx_open(&x,
            "schema\n  field o codes RES EDU UNK\nend\n"
            "map o from building, type\n  house -> RES\n  yes -> nothing\nend\n"
            "map o from amenity\n  school -> EDU\nend\n",
            fields);
    const char *v1[] = {"house", "school"};
    st_feature *f = feature(&x, v1);
    const st_field_value *v = apply(&x, f, "o");
    assert_string_equal(v->text, "RES");
    assert_string_equal(v->rule, "t.rules:5");
    st_feature_free(f);
    /* building says nothing: the second block fills the field */
    const char *v2[] = {"yes", "school"};
    f = feature(&x, v2);
    v = apply(&x, f, "o");
    assert_string_equal(v->text, "EDU");
    assert_string_equal(v->rule, "t.rules:9");
    st_feature_free(f);
    /* the same st_fields object for another layer: reset the cache */
    st_fields other;
    st_fields_init(&other);
    uint32_t idx;
    assert_int_equal(st_fields_add(&other, "amenity", ST_FIELD_TEXT, 0, 0, &idx), ST_OK);
    st_rules_ctx_reset_layer(x.ctx);
    f = st_feature_new();
    assert_int_equal(st_feature_set_value(f, 0, "school", 6), ST_OK);
    assert_int_equal(st_rules_apply(x.ctx, f, &other, &x.findings), ST_OK);
    assert_string_equal(f->schema[0].text, "EDU");
    st_feature_free(f);
    st_fields_free(&other);
    fx_close(&x);
}

/* ---- derive ---------------------------------------------------------------- */

static const char derive_rules[] =
    "schema\n"                                                       /* 1 */
    "  field storeys integer 1..120\n"                               /* 2 */
    "  field height_m number 0..1000\n"                              /* 3 */
    "  field year_built integer 1000..2100\n"                        /* 4 */
    "end\n"                                                          /* 5 */
    "map storeys from levels_code\n"                                 /* 6 */
    "  ground -> 1\n"                                                /* 7 */
    "end\n"                                                          /* 8 */
    "derive height_m\n"                                              /* 9 */
    "  from height\n"                                                /* 10 */
    "end\n"                                                          /* 11 */
    "derive storeys\n"                                               /* 12 */
    "  from levels accepting words\n"                                /* 13 */
    "  from name accepting ground-plus\n"                            /* 14 */
    "  from max(1, round(height_m / 3 m))\n"                         /* 15 */
    "end\n"                                                          /* 16 */
    "derive year_built\n"                                            /* 17 */
    "  from year(start_date)\n"                                      /* 18 */
    "end\n";                                                         /* 19 */

static const char *const derive_fields[] = {"levels_code", "levels", "name", "height",
                                            "start_date", NULL};

static st_feature *dfeature(fx *x, const char *code, const char *levels, const char *name,
                            const char *height, const char *date)
{
    const char *values[] = {code, levels, name, height, date};
    return feature(x, values);
}

static void expect_storeys(fx *x, const char *levels, const char *name, const char *height,
                           const char *want, const char *rule)
{
    st_feature *f = dfeature(x, NULL, levels, name, height, NULL);
    const st_field_value *v = apply(x, f, "storeys");
    if (!want) {
        assert_int_equal(v->from, ST_PROV_UNKNOWN);
        assert_null(v->text);
        assert_string_equal(v->rule, "t.rules:2");
    } else {
        if (!v->text || strcmp(v->text, want))
            fail_msg("levels '%s' height '%s': storeys '%s', expected '%s'",
                     levels ? levels : "-", height ? height : "-", v->text ? v->text : "(null)",
                     want);
        assert_int_equal(v->from, ST_PROV_DERIVED);
        assert_string_equal(v->rule, rule);
    }
    st_feature_free(f);
}

static void test_derive_values(void **state)
{
    (void)state;
    fx x;
    fx_open(&x, derive_rules, derive_fields);
    expect_storeys(&x, "4", NULL, NULL, "4", "t.rules:13");
    expect_storeys(&x, "3-4", NULL, NULL, "4", "t.rules:13");    /* a range: upper bound */
    expect_storeys(&x, "3;4", NULL, NULL, "4", "t.rules:13");    /* a list: the largest */
    expect_storeys(&x, "two", NULL, NULL, "2", "t.rules:13");    /* accepting words */
    expect_storeys(&x, "4.5", NULL, NULL, "5", "t.rules:13");    /* a fraction goes up */
    /* "R+2" in a name: ground floor plus two */
    expect_storeys(&x, NULL, "B\xC3\xA2timent R+2", NULL, "3", "t.rules:14");
    /* heights with units, about 3 m a storey */
    expect_storeys(&x, NULL, NULL, "9 m", "3", "t.rules:15");
    expect_storeys(&x, NULL, NULL, "30 ft", "3", "t.rules:15");   /* 9.144 m */
    expect_storeys(&x, NULL, NULL, "16.7", "6", "t.rules:15");    /* 5.57 rounds to 6 */
    expect_storeys(&x, NULL, NULL, "1", "1", "t.rules:15");       /* max(1, 0) */
    expect_storeys(&x, NULL, NULL, NULL, NULL, NULL);
    /* a value that is not a number: the next line, and it is listed */
    expect_storeys(&x, "many", NULL, "6", "2", "t.rules:15");
    assert_int_equal(unmapped(&x, "storeys", "many"), 1);
    /* out of the schema's range: a finding, then the next line */
    size_t before = x.findings.count;
    expect_storeys(&x, "0", NULL, "12", "4", "t.rules:15");
    assert_int_equal(x.findings.count, before + 1);
    const st_finding *g = &x.findings.items[before];
    assert_string_equal(g->code, ST_FINDING_RULE_RANGE);
    assert_int_equal(g->severity, ST_SEV_WARNING);
    assert_string_equal(g->message, "storeys 0 from t.rules:13 is outside 1..120; not used");
    assert_int_equal(g->bid, 7);

    /* height in feet becomes metres; the year out of a date */
    st_feature *f = dfeature(&x, NULL, NULL, NULL, "30 ft", "1905-06-01");
    const st_field_value *v = apply(&x, f, "height_m");
    assert_string_equal(v->text, "9.144");
    assert_int_equal(v->from, ST_PROV_DERIVED);
    assert_string_equal(v->rule, "t.rules:10");
    v = &f->schema[st_rules_field_find(x.rules, "year_built")];
    assert_string_equal(v->text, "1905");
    assert_string_equal(v->rule, "t.rules:18");
    st_feature_free(f);
    fx_close(&x);
}

/* A source value is never overwritten by a derive rule. */
static void test_precedence(void **state)
{
    (void)state;
    fx x;
    fx_open(&x, derive_rules, derive_fields);
    st_feature *f = dfeature(&x, "ground", "5", NULL, "30", NULL);
    const st_field_value *v = apply(&x, f, "storeys");
    assert_string_equal(v->text, "1");
    assert_int_equal(v->from, ST_PROV_SOURCE);
    assert_string_equal(v->rule, "t.rules:7");
    /* apply again to the same feature: values are replaced, not stacked */
    st_free(f->values[0]);
    f->values[0] = NULL;
    v = apply(&x, f, "storeys");
    assert_string_equal(v->text, "5");
    assert_int_equal(v->from, ST_PROV_DERIVED);
    st_feature_free(f);
    fx_close(&x);
}

/* REFERENCES.md section 7 (COMP, IEEE-754 double): 9.6/3.2 is
** 2.9999999999999996, so a plain floor gives 2; 40.3/3.1 gives 12; 8.1/2.7
** gives 2. With the documented epsilon they are 3, 13 and 3. */
static void test_floating_point_trap(void **state)
{
    (void)state;
    assert_true(floor(9.6 / 3.2) == 2.0);   /* the trap is real on this machine */
    fx x;
    const char *fields[] = {"h", "q", NULL};
    fx_open(&x,
            "schema\n  field a integer\n  field b integer\n  field c integer\n"
            "  field d integer\n  field e number\nend\n"
            "derive a\n  from floor(h / 3.2)\nend\n"
            "derive b\n  from floor(40.3 / 3.1)\nend\n"
            "derive c\n  from floor(8.1 / 2.7)\nend\n"
            "derive d\n  from ceil(q / 3)\nend\n"
            "derive e\n  from round(2.5) + round(-2.5) + round(7.5 / 3)\nend\n",
            fields);
    const char *values[] = {"9.6", "9"};
    st_feature *f = feature(&x, values);
    assert_string_equal(apply(&x, f, "a")->text, "3");
    assert_string_equal(apply(&x, f, "b")->text, "13");
    assert_string_equal(apply(&x, f, "c")->text, "3");
    assert_string_equal(apply(&x, f, "d")->text, "3");      /* ceil(3) stays 3 */
    /* half away from zero: 3 + -3 + 3 (7.5/3 = 2.5 -> 3, as C's lround) */
    assert_string_equal(apply(&x, f, "e")->text, "3");
    st_feature_free(f);
    fx_close(&x);
}

/* attribute("...") reads attributes whose names are not plain names. */
static void test_attribute_call(void **state)
{
    (void)state;
    fx x;
    const char *fields[] = {"roof height", NULL};
    fx_open(&x, "schema\n  field h number\nend\nderive h\n  from attribute(\"roof height\") * 2\nend\n",
            fields);
    expect_one(&x, "1.5 m", "h", "3", ST_PROV_DERIVED, "t.rules:5");
    expect_one(&x, NULL, "h", NULL, ST_PROV_UNKNOWN, "t.rules:2");
    fx_close(&x);
}

/* ---- checks and unknowns -------------------------------------------------- */

static void test_checks_and_unknowns(void **state)
{
    (void)state;
    fx x;
    const char *fields[] = {"building", "levels", NULL};
    fx_open(&x,
            "schema\n"                                                   /* 1 */
            "  field occupancy codes RES COM UNK\n"                      /* 2 */
            "  field storeys integer 1..120\n"                           /* 3 */
            "  field note text\n"                                        /* 4 */
            "  unknown occupancy UNK\n"                                  /* 5 */
            "end\n"                                                      /* 6 */
            "map occupancy from building\n  house -> RES\nend\n"         /* 7-9 */
            "derive storeys\n  from levels\nend\n"                       /* 10-12 */
            "check\n"                                                    /* 13 */
            "  storeys > 30 and occupancy = RES -> warning \"tall residential\"\n" /* 14 */
            "  storeys is unknown -> note \"no storeys\"\n"              /* 15 */
            "  area_m2 > 100 and not (occupancy = COM) -> error \"big\"\n" /* 16 */
            "  storeys < 3 -> note \"low\"\n"                            /* 17 */
            "end\n",
            fields);
    const char *v1[] = {"house", "40"};
    st_feature *f = feature(&x, v1);
    apply(&x, f, "occupancy");
    assert_int_equal(x.findings.count, 2);
    assert_string_equal(x.findings.items[0].code, ST_FINDING_RULE_CHECK);
    assert_int_equal(x.findings.items[0].severity, ST_SEV_WARNING);
    assert_string_equal(x.findings.items[0].message, "tall residential (t.rules:14)");
    assert_true(isnan(x.findings.items[0].x));
    assert_int_equal(x.findings.items[1].severity, ST_SEV_ERROR);
    assert_string_equal(x.findings.items[1].message, "big (t.rules:16)");
    /* provenance of every field */
    assert_int_equal(f->schema[0].from, ST_PROV_SOURCE);
    assert_string_equal(f->schema[0].rule, "t.rules:8");
    assert_int_equal(f->schema[1].from, ST_PROV_DERIVED);
    assert_string_equal(f->schema[1].rule, "t.rules:11");
    assert_int_equal(f->schema[2].from, ST_PROV_UNKNOWN);
    assert_null(f->schema[2].text);
    assert_string_equal(f->schema[2].rule, "t.rules:4");
    st_feature_free(f);

    /* nothing applies: unknown values; comparisons with unknown are false */
    st_findings_free(&x.findings);
    st_findings_init(&x.findings);
    const char *v2[] = {"barn", NULL};
    f = feature(&x, v2);
    f->area_m2 = 50;
    const st_field_value *v = apply(&x, f, "occupancy");
    assert_string_equal(v->text, "UNK");
    assert_int_equal(v->from, ST_PROV_UNKNOWN);
    assert_string_equal(v->rule, "t.rules:5");
    assert_int_equal(x.findings.count, 1);
    assert_string_equal(x.findings.items[0].message, "no storeys (t.rules:15)");
    st_feature_free(f);
    fx_close(&x);
}

static void test_defaults_when(void **state)
{
    (void)state;
    fx x;
    const char *fields[] = {"building", NULL};
    fx_open(&x,
            "schema\n  field o codes RES COM UNK\n  field s integer 1..9\nend\n"
            "map o from building\n  house -> RES\nend\n"
            "defaults\n  in district OLD-* when o = RES set s 2 70%, 3 30%\n"
            "  everywhere set s 1\nend\n",
            fields);
    const char *v1[] = {"house"};
    st_feature *f = feature(&x, v1);
    apply(&x, f, "o");
    assert_true(st_rules_when(x.ctx, st_rules_default(x.rules, 0), f));
    assert_true(st_rules_when(x.ctx, st_rules_default(x.rules, 1), f));
    st_feature_free(f);
    const char *v2[] = {"shed"};
    f = feature(&x, v2);
    apply(&x, f, "o");
    assert_false(st_rules_when(x.ctx, st_rules_default(x.rules, 0), f));
    st_feature_free(f);
    fx_close(&x);
}

/* ---- hostile regex ---------------------------------------------------------- */

/* (a+)+$ against 100,000 'a' and a '!' backtracks exponentially; the PCRE2
** match limit ends it with a finding. No timing assertion: it returns. */
static void test_hostile_regex(void **state)
{
    (void)state;
    fx x;
    const char *fields[] = {"name", NULL};
    fx_open(&x, "schema\n  field o codes A B\nend\nmap o from name\n  /(a+)+$/ -> A\n  /!/ -> B\nend\n",
            fields);
    size_t n = 100000;
    char *s = malloc(n + 2);
    assert_non_null(s);
    memset(s, 'a', n);
    s[n] = '!';
    s[n + 1] = '\0';
    const char *values[] = {s};
    st_feature *f = feature(&x, values);
    const st_field_value *v = apply(&x, f, "o");
    /* the limit counts as no match: the next line applies */
    assert_string_equal(v->text, "B");
    assert_string_equal(v->rule, "t.rules:6");
    assert_int_equal(x.findings.count, 1);
    assert_string_equal(x.findings.items[0].code, ST_FINDING_RULE_MATCH_LIMIT);
    assert_non_null(strstr(x.findings.items[0].message, "match limit was hit"));
    assert_non_null(strstr(x.findings.items[0].message, "(100001 bytes)"));
    st_feature_free(f);
    free(s);
    fx_close(&x);
}

/* ---- unmapped counters -------------------------------------------------------- */

static void test_unmapped_merge_and_order(void **state)
{
    (void)state;
    st_unmapped *a, *b;
    assert_int_equal(st_unmapped_new(&a), ST_OK);
    assert_int_equal(st_unmapped_new(&b), ST_OK);
    for (int i = 0; i < 300; i++) {
        char v[16];
        snprintf(v, sizeof v, "v%d", i);
        assert_int_equal(st_unmapped_add(a, "occupancy", v, 1), ST_OK);
    }
    assert_int_equal(st_unmapped_add(a, "occupancy", "barn", 3), ST_OK);
    assert_int_equal(st_unmapped_add(b, "occupancy", "barn", 2), ST_OK);
    assert_int_equal(st_unmapped_add(b, "material", "barn", 4), ST_OK);
    assert_int_equal(st_unmapped_add(b, "material", "adobe", 4), ST_OK);
    assert_int_equal(st_unmapped_merge(a, b), ST_OK);
    st_unmapped_item *items;
    size_t n;
    assert_int_equal(st_unmapped_sorted(a, &items, &n), ST_OK);
    assert_int_equal(n, 303);
    assert_string_equal(items[0].field, "occupancy");
    assert_string_equal(items[0].value, "barn");
    assert_int_equal(items[0].count, 5);
    assert_string_equal(items[1].value, "adobe");     /* ties: field, then value */
    assert_string_equal(items[2].field, "material");
    assert_string_equal(items[2].value, "barn");
    assert_int_equal(items[3].count, 1);
    st_free(items);
    /* long values are cut at a character boundary */
    char longv[400];
    memset(longv, 'x', sizeof longv);
    longv[ST_UNMAPPED_MAX_VALUE - 1] = '\xC3';
    longv[ST_UNMAPPED_MAX_VALUE] = '\xA9';
    longv[sizeof longv - 1] = '\0';
    assert_int_equal(st_unmapped_add(b, "f", longv, 1), ST_OK);
    assert_int_equal(st_unmapped_sorted(b, &items, &n), ST_OK);
    for (size_t i = 0; i < n; i++)
        if (!strcmp(items[i].field, "f"))
            assert_int_equal(strlen(items[i].value), ST_UNMAPPED_MAX_VALUE - 1);
    st_free(items);
    st_unmapped_free(a);
    st_unmapped_free(b);
}

/* ---- the starter pack ----------------------------------------------------------- */

static const char *starter_path(void)
{
    static char path[4096];
    const char *here = __FILE__;
    const char *slash = strrchr(here, '/');
    size_t n = slash ? (size_t)(slash - here) : 0;
    snprintf(path, sizeof path, "%.*s%s../../rules/starter.rules", (int)n, here, n ? "/" : "");
    return path;
}

/* Every value a map line or a derive literal of the starter pack can give
** is in its field's code list (what lint also enforces). */
static void test_starter_targets_in_schema(void **state)
{
    (void)state;
    const char *paths[] = {starter_path()};
    st_diags d;
    st_diags_init(&d);
    st_rules *r = NULL;
    assert_int_equal(st_rules_load(paths, 1, &d, &r), ST_OK);
    assert_int_equal(d.errors, 0);
    assert_int_equal(d.warnings, 0);
    size_t targets = 0;
    for (uint32_t i = 0; i < r->nmaps; i++) {
        const rmap *m = r->maps[i];
        assert_true(m->field >= 0);
        for (uint32_t k = 0; k < m->nlines; k++)
            if (m->lines[k]->target) {
                assert_true(st_rules_field_accepts(r, (uint32_t)m->field, m->lines[k]->target));
                targets++;
            }
        if (m->mixed)
            assert_true(st_rules_field_accepts(r, (uint32_t)m->field, m->mixed));
    }
    assert_true(targets > 30);
    for (uint32_t i = 0; i < r->nfields; i++)
        if (r->fields[i].unknown)
            assert_true(st_rules_field_accepts(r, i, r->fields[i].unknown));
    st_rules_free(r);
    st_diags_free(&d);
}

/* Attribute shapes of the real sets in /work/shared/data/real (README):
** OSM keys (kronstadt), 10-character keys (banepa), a Geofabrik 'type'
** column (belem, north_macedonia, fianarantsoa). */
static void test_starter_on_typical_features(void **state)
{
    (void)state;
    const char *paths[] = {starter_path()};
    st_diags d;
    st_diags_init(&d);
    fx x;
    memset(&x, 0, sizeof x);
    assert_int_equal(st_rules_load(paths, 1, &d, &x.rules), ST_OK);
    assert_int_equal(st_rules_ctx_new(x.rules, &x.ctx), ST_OK);
    st_findings_init(&x.findings);
    static const char *const names[] = {"building", "building:levels", "building:material",
                                        "height", "roof:material", "start_date", "amenity",
                                        "building_l", "building_m", "roof_mater", "CONS_TYPE",
                                        "type", NULL};
    st_fields_init(&x.layer);
    for (int i = 0; names[i]; i++) {
        uint32_t idx;
        assert_int_equal(st_fields_add(&x.layer, names[i], ST_FIELD_TEXT, 0, 0, &idx), ST_OK);
    }
    static const struct {
        const char *v[12];
        const char *occupancy, *material, *roof, *storeys, *height, *year;
    } cases[] = {
        /* kronstadt-like */
        {{"apartments", "5", "brick", "16.7", "tar_paper", "1905", NULL}, "RES", "URM", "MEMB",
         "5", "16.7", "1905"},
        {{"yes", NULL, NULL, "18.5", "metal", NULL, "school"}, "EDU", "UNK", "METAL", "6",
         "18.5", NULL},
        {{"garages", "1"}, "ANC", "UNK", "UNK", "1", NULL, NULL},
        /* banepa-like: keys cut to 10 characters */
        {{"yes", NULL, NULL, NULL, NULL, NULL, NULL, "4.5", "concrete", "concerte", "RCC"},
         "UNK", "RC", "CONC", "5", NULL, NULL},
        {{"residential", NULL, NULL, NULL, NULL, NULL, NULL, "3", "tin", "Tin"}, "RES", "LMT",
         "METAL", "3", NULL, NULL},
        {{"yes", NULL, NULL, NULL, NULL, NULL, NULL, NULL, NULL, "clay_tiles", "RBC"}, "UNK",
         "RM", "TILE", NULL, NULL, NULL},
        /* Geofabrik-style: 'type' holds building=* (empty for yes) */
        {{NULL, NULL, NULL, NULL, NULL, NULL, NULL, NULL, NULL, NULL, NULL, "house"}, "RES",
         "UNK", "UNK", NULL, NULL, NULL},
        {{NULL, NULL, NULL, NULL, NULL, NULL, NULL, NULL, NULL, NULL, NULL, "place_of_worship"},
         "REL", "UNK", "UNK", NULL, NULL, NULL},
        {{NULL, NULL, NULL, NULL, NULL, NULL, NULL, NULL, NULL, NULL, NULL, "exhibition_centr"},
         "COM", "UNK", "UNK", NULL, NULL, NULL},
        {{"residential;retail"}, "MIX", "UNK", "UNK", NULL, NULL, NULL},
    };
    for (size_t i = 0; i < sizeof cases / sizeof *cases; i++) {
        st_feature *f = feature(&x, cases[i].v);
        assert_int_equal(st_rules_apply(x.ctx, f, &x.layer, &x.findings), ST_OK);
        const char *want[] = {cases[i].occupancy, cases[i].material, cases[i].roof,
                              cases[i].storeys, cases[i].height, cases[i].year};
        for (uint32_t k = 0; k < 6; k++) {
            const char *got = f->schema[k].text;
            if ((want[k] == NULL) != (got == NULL) || (got && strcmp(got, want[k])))
                fail_msg("case %zu: %s is '%s', expected '%s'", i, x.rules->fields[k].name,
                         got ? got : "(null)", want[k] ? want[k] : "(null)");
            /* every value the pack emits is valid for its field */
            if (got)
                assert_true(st_rules_field_accepts(x.rules, k, got));
            assert_non_null(f->schema[k].rule);
        }
        st_feature_free(f);
    }
    /* 16.7 m over 5 storeys is 3.3 m a storey: no check fires for case 0 */
    for (size_t i = 0; i < x.findings.count; i++)
        assert_true(x.findings.items[i].bid == 7);
    st_diags_free(&d);
    fx_close(&x);
}

/* ---- allocation failures during evaluation ---------------------------------------- */

static void test_apply_allocation_failures(void **state)
{
    (void)state;
    fx x;
    const char *fields[] = {"building", "levels", NULL};
    fx_open(&x,
            "schema\n  field o codes RES COM MIX UNK\n  field s integer 1..9\n  unknown o UNK\nend\n"
            "map o from building ignoring case and accents mixed as MIX\n"
            "  house -> RES\n  /^shop/ -> COM\nend\n"
            "derive s\n  from levels\nend\n"
            "check\n  s > 3 -> note \"high\"\nend\n",
            fields);
    const char *values[] = {"House;Shop", "7"};
    for (long n = 1;; n++) {
        st_feature *f = feature(&x, values);
        st_rules_ctx *ctx = NULL;
        st_findings out;
        st_findings_init(&out);
        st_alloc_fail_after(n);
        st_status rc = st_rules_ctx_new(x.rules, &ctx);
        if (rc == ST_OK)
            rc = st_rules_apply(ctx, f, &x.layer, &out);
        long count = st_alloc_count();
        st_alloc_fail_after(0);
        if (count < n) {
            assert_int_equal(rc, ST_OK);
            assert_string_equal(f->schema[0].text, "MIX");
            assert_int_equal(out.count, 1);
            st_rules_ctx_free(ctx);
            st_findings_free(&out);
            st_feature_free(f);
            assert_true(n > 5);
            break;
        }
        if (rc != ST_ERR_NOMEM)
            fail_msg("allocation %ld: status %s, expected nomem", n, st_status_name(rc));
        st_rules_ctx_free(ctx);
        st_findings_free(&out);
        st_feature_free(f);
    }
    fx_close(&x);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_map_exact_caseless_accents),
        cmocka_unit_test(test_map_exact_is_exact),
        cmocka_unit_test(test_map_first_match_wins),
        cmocka_unit_test(test_map_multi_valued),
        cmocka_unit_test(test_map_sources),
        cmocka_unit_test(test_derive_values),
        cmocka_unit_test(test_precedence),
        cmocka_unit_test(test_floating_point_trap),
        cmocka_unit_test(test_attribute_call),
        cmocka_unit_test(test_checks_and_unknowns),
        cmocka_unit_test(test_defaults_when),
        cmocka_unit_test(test_hostile_regex),
        cmocka_unit_test(test_unmapped_merge_and_order),
        cmocka_unit_test(test_starter_targets_in_schema),
        cmocka_unit_test(test_starter_on_typical_features),
        cmocka_unit_test(test_apply_allocation_failures),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
