/*
** tests/fuzz/fuzz_rules.c -- fuzz target for the rule language: lexer,
** parser, checker (st_rules_load_text) and, when the text loads, the
** evaluator on a few features (map tables, regular expressions under their
** PCRE2 limits, derive expressions, checks, default conditions).
**
** Input:   rule text. It is also written to <scratch>/in.rules so that an
**          include of "in.rules" reaches the include-cycle check. Seeds:
**          tests/fuzz/corpus/rules/ (tests/data/rules and the rule packs).
** Asserts: a failed load leaves an error diagnostic; a successful one
**          leaves none; evaluation succeeds (it only fails on no memory);
**          sanitizers do the rest.
*/
#include "fuzz.h"
#include "stocktake/rules.h"

/* Attribute names and values typical of the real extracts, plus values
** made to stress matching: long runs, odd case, invalid-looking numbers. */
static const char *const field_names[] = {
    "building", "building:levels", "height", "name", "amenity",
    "building:material", "roof:material", "type", "levels"};
static const char *const sample_values[][9] = {
    {"house", "2", "7.5", "Maison", "school", "brick", "metal", "residential", "3"},
    {"yes", "4.5", "-3", "R+4", NULL, "Concrete", "concerte", "COM", "0"},
    {"aaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaa!",
     "1e308", "nan", "\xc3\xa9\xc3\xa9", "", "wood;stone", "Flat", "apartments", "-1"},
};

static void evaluate(const st_rules *rules)
{
    st_rules_ctx *ctx = NULL;
    if (st_rules_ctx_new(rules, &ctx) != ST_OK)
        fuzz_die("st_rules_ctx_new failed");
    st_fields layer;
    st_fields_init(&layer);
    for (uint32_t i = 0; i < sizeof field_names / sizeof field_names[0]; i++) {
        uint32_t idx;
        if (st_fields_add(&layer, field_names[i], ST_FIELD_TEXT, 0, 0, &idx) != ST_OK)
            fuzz_die("st_fields_add failed");
    }
    st_findings out;
    st_findings_init(&out);
    for (size_t k = 0; k < sizeof sample_values / sizeof sample_values[0]; k++) {
        st_feature *f = st_feature_new();
        if (!f)
            fuzz_die("st_feature_new failed");
        for (uint32_t i = 0; i < layer.count; i++) {
            const char *v = sample_values[k][i];
            if (st_feature_set_value(f, i, v, v ? strlen(v) : 0) != ST_OK)
                fuzz_die("st_feature_set_value failed");
        }
        f->area_m2 = k == 2 ? 1e12 : 85.0 * (double)(k + 1);
        f->perimeter_m = 40.0;
        if (st_rules_apply(ctx, f, &layer, &out) != ST_OK)
            fuzz_die("st_rules_apply failed without an allocation failure");
        for (size_t d = 0; d < st_rules_default_count(rules); d++)
            (void)st_rules_when(ctx, st_rules_default(rules, d), f);
        st_feature_free(f);
    }
    st_findings_free(&out);
    st_fields_free(&layer);
    st_rules_ctx_free(ctx);
}

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
    const char *path = fuzz_file(0, "in.rules", data, size);
    st_diags d;
    st_diags_init(&d);
    st_rules *rules = NULL;
    st_status rc = st_rules_load_text(path, (const char *)data, size, &d, &rules);
    if ((rc == ST_OK) != (rules != NULL))
        fuzz_die("st_rules_load_text: status and result disagree");
    fuzz_check_diags(rc, &d, 0);
    if (rc == ST_OK && d.errors)
        fuzz_die("a rule set loaded with error diagnostics");
    if (rules) {
        for (size_t i = 0; i < st_rules_setting_count(rules); i++)
            (void)st_rules_setting(rules, i)->name;
        for (size_t i = 0; i < st_rules_gate_count(rules); i++)
            (void)st_rules_gate_holds(st_rules_gate(rules, i), 0.5);
        evaluate(rules);
    }
    st_rules_free(rules);
    st_diags_free(&d);
    return 0;
}
