/*
** tests/fuzz/fuzz_csv.c -- fuzz target for the CSV tables a run reads:
** the generic reader (st_csv_read, over libcsv), the reference counts
** (st_reference_load) and a defaults table (the `table` line of a rule
** set, through st_defaults_new, then applied to a few buildings).
**
** Input:   any bytes, written to <scratch>/in.csv. Seeds:
**          tests/fuzz/corpus/csv/ (hand-made tables of both kinds) and
**          samples/reference_counts.csv.
** Asserts: every row's cells are within the documented limits and valid
**          UTF-8; a failure leaves an error diagnostic; the invariants of
**          fuzz.h; sanitizers do the rest.
*/
#include "fuzz.h"
#include "stocktake/audit.h"
#include "stocktake/csvread.h"
#include "stocktake/defaults.h"
#include "stocktake/rules.h"

static st_status check_row(void *ud, long line, char *const *cells, size_t n)
{
    (void)ud;
    if (line < 1 || n > ST_CSV_MAX_COLUMNS)
        fuzz_die("a CSV row out of the documented limits");
    for (size_t i = 0; i < n; i++) {
        size_t len = strlen(cells[i]);
        if (len > ST_CSV_MAX_CELL || st_utf8_valid_prefix(cells[i], len) != len)
            fuzz_die("a CSV cell too long or not UTF-8");
    }
    return ST_OK;
}

static const char rules_text[] =
    "schema\n"
    "  field occupancy codes RES COM UNK\n"
    "  field material codes RC RM URM TMB UNK\n"
    "  field storeys integer 1..60\n"
    "  unknown occupancy UNK\n"
    "  unknown material UNK\n"
    "end\n"
    "defaults\n"
    "  table \"in.csv\"\n"
    "end\n";

static void defaults_table(void)
{
    char name[160];
    snprintf(name, sizeof name, "%s/t.rules", fuzz_dir());
    st_diags d;
    st_diags_init(&d);
    st_rules *rules = NULL;
    st_rules_ctx *ctx = NULL;
    st_defaults *def = NULL;
    st_status rc = st_rules_load_text(name, rules_text, sizeof rules_text - 1, &d, &rules);
    if (rc != ST_OK)   /* the text is fixed; only the table varies */
        return;
    static const char *const districts[] = {"OLD-1", "NEW-1", "QM01"};
    static const char *const regions[] = {"NORTH", NULL, "SOUTH"};
    st_defaults_places pl = {districts, regions, 3};
    rc = st_defaults_new(rules, &pl, &d, &def);
    fuzz_check_diags(rc, &d, 0);
    if (rc == ST_OK && st_rules_ctx_new(rules, &ctx) == ST_OK) {
        st_fields layer;
        st_fields_init(&layer);
        st_findings out;
        st_findings_init(&out);
        for (int k = 0; k < 4; k++) {
            st_feature *f = st_feature_new();
            if (!f)
                fuzz_die("st_feature_new failed");
            f->bid = (uint64_t)k + 1;
            f->district = k - 1;
            if (st_rules_apply(ctx, f, &layer, &out) != ST_OK ||
                st_defaults_apply(def, ctx, f, k & 1 ? ST_FILL_DRAW : ST_FILL_MOST_LIKELY, 7) != ST_OK)
                fuzz_die("applying defaults failed without an allocation failure");
            st_feature_free(f);
        }
        st_findings_free(&out);
        st_fields_free(&layer);
    }
    st_rules_ctx_free(ctx);
    st_defaults_free(def);
    st_rules_free(rules);
    st_diags_free(&d);
}

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
    const char *path = fuzz_file(0, "in.csv", data, size);
    st_diags d;
    st_diags_init(&d);
    st_status rc = st_csv_read(path, 1 << 20, check_row, NULL, &d);
    fuzz_check_diags(rc, &d, 1);
    st_diags_free(&d);

    st_diags_init(&d);
    st_reference *ref = NULL;
    rc = st_reference_load(path, &d, &ref);
    fuzz_check_diags(rc, &d, 1);
    if ((rc == ST_OK) != (ref != NULL))
        fuzz_die("st_reference_load: status and result disagree");
    for (size_t i = 0; ref && i < st_reference_count(ref); i++) {
        uint64_t n;
        const char *key = st_reference_key(ref, i, &n);
        if (!key || st_utf8_valid_prefix(key, strlen(key)) != strlen(key))
            fuzz_die("a reference key that is missing or not UTF-8");
    }
    st_reference_free(ref);
    st_diags_free(&d);

    defaults_table();
    return 0;
}
