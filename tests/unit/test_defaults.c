/*
** tests/unit/test_defaults.c -- the defaults stage: precedence (learned,
** district, region, everywhere; inline before table; conditions), the
** fill order when a condition reads a defaulted field, learned defaults
** with the fall-back below N, the two fill modes and their provenance,
** reproducibility by seed (and independence from the order buildings are
** processed in), the chi-square test of drawn shares, defaults tables
** (conditions, ranges, errors with file:line), and allocation failures.
**
** Buildings go through the real rule evaluator (st_rules_apply) first, so
** provenance `source`/`derived`/`unknown` is what the rules set.
*/
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

#include "stocktake/defaults.h"
#include "scratch.h"

static char tmpdir[256];

static const char *write_file(const char *name, const char *text)
{
    static char path[4][512];
    static int k;
    char *p = path[k++ % 4];
    snprintf(p, 512, "%s/%s", tmpdir, name);
    FILE *fp = fopen(p, "w");
    assert_non_null(fp);
    fputs(text, fp);
    fclose(fp);
    return p;
}

/* ---- fixture -------------------------------------------------------------- */

#define SCHEMA                                                              \
    "schema\n"                                                              \
    "  field material codes RC URM RM TMB UNK\n"                            \
    "  field occupancy codes RES COM UNK\n"                                 \
    "  field storeys integer 1..50\n"                                       \
    "  unknown occupancy UNK\n"                                             \
    "  unknown material UNK\n"                                              \
    "end\n"                                                                 \
    "map occupancy from occ\n"                                              \
    "  res -> RES\n"                                                        \
    "  com -> COM\n"                                                        \
    "end\n"                                                                 \
    "map material from mat\n"                                               \
    "  rc -> RC\n"                                                          \
    "  urm -> URM\n"                                                        \
    "  rm -> RM\n"                                                          \
    "  tmb -> TMB\n"                                                        \
    "end\n"                                                                 \
    "derive storeys\n"                                                      \
    "  from lev\n"                                                          \
    "end\n"

enum { F_MATERIAL, F_OCCUPANCY, F_STOREYS };

static const char *const DKEYS[] = {"OLD-1", "OLD-2", "NEW-1", "NEW-2"};
static const char *const DREGIONS[] = {"NORTH", "NORTH", "SOUTH", NULL};

typedef struct fx {
    st_rules *rules;
    st_rules_ctx *ctx;
    st_defaults *d;
    st_fields layer;
    st_diags diags;
    st_findings findings;
    st_feature **fs;
    size_t n, cap;
} fx;

static void render_diags(const st_diags *d)
{
    st_buf b;
    st_buf_init(&b, 0);
    for (size_t i = 0; i < d->count; i++)
        if (st_diag_render(&d->items[i], &b) != ST_OK)
            break;
    if (b.data)
        fprintf(stderr, "%s", b.data);
    st_buf_free(&b);
}

/* Load SCHEMA + 'extra' and prepare the defaults; returns the status of
** st_defaults_new (the rules must load). */
static st_status fx_open(fx *x, const char *extra)
{
    memset(x, 0, sizeof *x);
    st_diags_init(&x->diags);
    st_findings_init(&x->findings);
    st_buf text;
    st_buf_init(&text, 0);
    assert_int_equal(st_buf_printf(&text, "%s%s", SCHEMA, extra), ST_OK);
    char name[600];
    snprintf(name, sizeof name, "%s/t.rules", tmpdir);
    st_status rc = st_rules_load_text(name, text.data, text.len, &x->diags, &x->rules);
    st_buf_free(&text);
    if (rc != ST_OK)
        render_diags(&x->diags);
    assert_int_equal(rc, ST_OK);
    assert_int_equal(st_rules_ctx_new(x->rules, &x->ctx), ST_OK);
    st_fields_init(&x->layer);
    const char *names[] = {"occ", "mat", "lev"};
    for (int i = 0; i < 3; i++)
        assert_int_equal(st_fields_add(&x->layer, names[i], ST_FIELD_TEXT, 0, 0, NULL), ST_OK);
    st_defaults_places pl = {DKEYS, DREGIONS, 4};
    return st_defaults_new(x->rules, &pl, &x->diags, &x->d);
}

static void fx_close(fx *x)
{
    for (size_t i = 0; i < x->n; i++)
        st_feature_free(x->fs[i]);
    free(x->fs);
    st_defaults_free(x->d);
    st_rules_ctx_free(x->ctx);
    st_rules_free(x->rules);
    st_fields_free(&x->layer);
    st_findings_free(&x->findings);
    st_diags_free(&x->diags);
}

/* A kept building in district 'district' (-1: none) with source values
** occ, mat, lev (NULL = missing), after map and derive. */
static st_feature *add(fx *x, int32_t district, const char *occ, const char *mat, const char *lev)
{
    st_feature *f = st_feature_new();
    assert_non_null(f);
    const char *v[3] = {occ, mat, lev};
    for (uint32_t i = 0; i < 3; i++)
        if (v[i])
            assert_int_equal(st_feature_set_value(f, i, v[i], strlen(v[i])), ST_OK);
    f->bid = x->n + 1;
    f->district = district;
    f->area_m2 = 100;
    assert_int_equal(st_rules_apply(x->ctx, f, &x->layer, &x->findings), ST_OK);
    if (x->n == x->cap) {
        x->cap = x->cap ? 2 * x->cap : 64;
        x->fs = realloc(x->fs, x->cap * sizeof *x->fs);
        assert_non_null(x->fs);
    }
    x->fs[x->n++] = f;
    return f;
}

static void learn_and_apply(fx *x, st_fill_mode mode, uint64_t seed)
{
    assert_int_equal(st_defaults_learn(x->d, x->fs, x->n), ST_OK);
    for (size_t i = 0; i < x->n; i++)
        assert_int_equal(st_defaults_apply(x->d, x->ctx, x->fs[i], mode, seed), ST_OK);
}

static void expect(const st_feature *f, int field, const char *text, st_provenance from,
                   const char *rule_suffix)
{
    const st_field_value *v = &f->schema[field];
    if (!v->text || strcmp(v->text, text) || v->from != from) {
        fail_msg("bid %llu field %d: got %s (%s), want %s (%s)", (unsigned long long)f->bid, field,
                 v->text ? v->text : "NULL", st_provenance_name(v->from), text,
                 st_provenance_name(from));
    }
    if (rule_suffix) {
        assert_non_null(v->rule);
        size_t a = strlen(v->rule), b = strlen(rule_suffix);
        if (a < b || strcmp(v->rule + a - b, rule_suffix))
            fail_msg("bid %llu field %d: rule %s, want ...%s", (unsigned long long)f->bid, field,
                     v->rule, rule_suffix);
    }
}

/* ---- precedence ---------------------------------------------------------- */

static void test_precedence(void **state)
{
    (void)state;
    fx x;
    /* line numbers: SCHEMA takes lines 1..20 */
    assert_int_equal(fx_open(&x, "defaults\n"                                     /* 21 */
                                 "  everywhere set material RC\n"                  /* 22 */
                                 "  in region north set material RM\n"             /* 23 */
                                 "  in district OLD-* when occupancy = RES set material URM\n"
                                 "  in district old-2 set material TMB\n"          /* 25 */
                                 "  everywhere set occupancy RES\n"                /* 26 */
                                 "end\n"),
                     ST_OK);
    st_feature *a = add(&x, 0, "res", NULL, NULL);   /* OLD-1, RES: district line 24 */
    st_feature *b = add(&x, 0, "com", NULL, NULL);   /* OLD-1, COM: 25 fails -> region */
    st_feature *c = add(&x, 1, "com", NULL, NULL);   /* OLD-2: line 25 (case-insensitive) */
    st_feature *d = add(&x, 2, NULL, NULL, NULL);    /* NEW-1 in SOUTH: everywhere */
    st_feature *e = add(&x, 3, "res", "rc", NULL);   /* source wins */
    st_feature *g = add(&x, -1, "res", NULL, NULL);  /* no district: everywhere only */
    learn_and_apply(&x, ST_FILL_MOST_LIKELY, 1);
    expect(a, F_MATERIAL, "URM", ST_PROV_DEFAULT, "t.rules:24");
    expect(b, F_MATERIAL, "RM", ST_PROV_DEFAULT, "t.rules:23");
    expect(c, F_MATERIAL, "TMB", ST_PROV_DEFAULT, "t.rules:25");
    expect(d, F_MATERIAL, "RC", ST_PROV_DEFAULT, "t.rules:22");
    expect(e, F_MATERIAL, "RC", ST_PROV_SOURCE, NULL);
    expect(g, F_MATERIAL, "RC", ST_PROV_DEFAULT, "t.rules:22");
    expect(d, F_OCCUPANCY, "RES", ST_PROV_DEFAULT, "t.rules:26");
    expect(a, F_OCCUPANCY, "RES", ST_PROV_SOURCE, NULL);
    /* no default for storeys: stays unknown */
    assert_int_equal(a->schema[F_STOREYS].from, ST_PROV_UNKNOWN);
    fx_close(&x);
}

/* material's default reads occupancy, which is itself defaulted: material
** comes first in the schema, yet is filled after occupancy. */
static void test_fill_order(void **state)
{
    (void)state;
    fx x;
    assert_int_equal(fx_open(&x, "defaults\n"
                                 "  everywhere when occupancy = COM set material RC\n"
                                 "  everywhere when storeys > 3 set occupancy COM\n"
                                 "  everywhere set storeys 5\n"
                                 "end\n"),
                     ST_OK);
    st_feature *a = add(&x, 2, NULL, NULL, NULL);
    st_feature *b = add(&x, 2, NULL, NULL, "2");
    learn_and_apply(&x, ST_FILL_MOST_LIKELY, 1);
    expect(a, F_STOREYS, "5", ST_PROV_DEFAULT, NULL);
    expect(a, F_OCCUPANCY, "COM", ST_PROV_DEFAULT, NULL);
    expect(a, F_MATERIAL, "RC", ST_PROV_DEFAULT, NULL);
    expect(b, F_STOREYS, "2", ST_PROV_DERIVED, NULL);
    assert_int_equal(b->schema[F_OCCUPANCY].from, ST_PROV_UNKNOWN);
    assert_int_equal(b->schema[F_MATERIAL].from, ST_PROV_UNKNOWN);
    fx_close(&x);
}

/* ---- learned defaults --------------------------------------------------- */

static void test_learned_with_fallback(void **state)
{
    (void)state;
    fx x;
    assert_int_equal(fx_open(&x, "defaults\n"
                                 "  in district OLD-1 set material RC\n"
                                 "  in region NORTH set material TMB\n"
                                 "  everywhere set material RM\n"
                                 "  learn material per district from 5 buildings\n"
                                 "  learn storeys per region from 3 buildings\n"
                                 "end\n"),
                     ST_OK);
    /* OLD-1: 6 observed (4 URM, 2 RM) >= 5: learned wins over the written
    ** district line; 2 unknown get URM (most frequent). */
    for (int i = 0; i < 4; i++)
        add(&x, 0, NULL, "urm", "2");
    for (int i = 0; i < 2; i++)
        add(&x, 0, NULL, "rm", "3");
    st_feature *a = add(&x, 0, NULL, NULL, NULL);
    /* OLD-2 (NORTH): 4 observed < 5: falls back to the region line */
    for (int i = 0; i < 4; i++)
        add(&x, 1, NULL, "rc", NULL);
    st_feature *b = add(&x, 1, NULL, NULL, NULL);
    /* NEW-1 (SOUTH): nothing learned, no region line: everywhere */
    st_feature *c = add(&x, 2, NULL, NULL, "7");
    st_feature *c2 = add(&x, 2, NULL, NULL, NULL);
    /* the none bucket teaches nothing and learns nothing */
    for (int i = 0; i < 9; i++)
        add(&x, -1, NULL, "tmb", NULL);
    st_feature *g = add(&x, -1, NULL, NULL, NULL);
    learn_and_apply(&x, ST_FILL_MOST_LIKELY, 1);
    expect(a, F_MATERIAL, "URM", ST_PROV_DEFAULT, "t.rules:25");
    expect(b, F_MATERIAL, "TMB", ST_PROV_DEFAULT, "t.rules:23");
    expect(c, F_MATERIAL, "RM", ST_PROV_DEFAULT, "t.rules:24");
    expect(g, F_MATERIAL, "RM", ST_PROV_DEFAULT, "t.rules:24");
    /* storeys per region: NORTH has 6 observed (4 x 2, 2 x 3): learned "2";
    ** SOUTH has 1 (< 3): nothing, stays unknown */
    expect(a, F_STOREYS, "2", ST_PROV_DEFAULT, "t.rules:26");
    expect(b, F_STOREYS, "2", ST_PROV_DEFAULT, "t.rules:26");
    assert_int_equal(c2->schema[F_STOREYS].from, ST_PROV_UNKNOWN);
    /* the report */
    assert_int_equal(st_defaults_learned_count(x.d), 2);
    const st_defaults_learned *l = st_defaults_learned_get(x.d, 0);
    assert_string_equal(l->where, "OLD-1");
    assert_int_equal(l->per_region, 0);
    assert_int_equal(l->field, F_MATERIAL);
    assert_int_equal(l->from_buildings, 6);
    assert_string_equal(l->distribution, "URM 66.7%, RM 33.3%");
    l = st_defaults_learned_get(x.d, 1);
    assert_string_equal(l->where, "NORTH");
    assert_int_equal(l->per_region, 1);
    assert_int_equal(l->from_buildings, 6);
    assert_string_equal(l->distribution, "2 66.7%, 3 33.3%");
    fx_close(&x);
}

/* ---- fill modes, seeds ---------------------------------------------------- */

static void test_fill_modes(void **state)
{
    (void)state;
    fx x;
    assert_int_equal(fx_open(&x, "defaults\n"
                                 "  everywhere set material URM 30%, RM 60%, TMB 10%\n"
                                 "  everywhere set occupancy RES\n"
                                 "end\n"),
                     ST_OK);
    for (int i = 0; i < 200; i++)
        add(&x, i % 4, NULL, NULL, NULL);
    learn_and_apply(&x, ST_FILL_MOST_LIKELY, 1);
    for (size_t i = 0; i < x.n; i++) {
        expect(x.fs[i], F_MATERIAL, "RM", ST_PROV_DEFAULT, "t.rules:22");
        expect(x.fs[i], F_OCCUPANCY, "RES", ST_PROV_DEFAULT, NULL);
    }
    fx_close(&x);

    assert_int_equal(fx_open(&x, "defaults\n"
                                 "  everywhere set material URM 30%, RM 60%, TMB 10%\n"
                                 "  everywhere set occupancy RES\n"
                                 "end\n"),
                     ST_OK);
    for (int i = 0; i < 200; i++)
        add(&x, i % 4, NULL, NULL, NULL);
    learn_and_apply(&x, ST_FILL_DRAW, 42);
    int seen[3] = {0, 0, 0};
    for (size_t i = 0; i < x.n; i++) {
        const st_field_value *v = &x.fs[i]->schema[F_MATERIAL];
        assert_int_equal(v->from, ST_PROV_DRAWN);
        seen[0] += !strcmp(v->text, "URM");
        seen[1] += !strcmp(v->text, "RM");
        seen[2] += !strcmp(v->text, "TMB");
        /* a single value is not drawn: provenance default in either mode */
        expect(x.fs[i], F_OCCUPANCY, "RES", ST_PROV_DEFAULT, NULL);
    }
    assert_int_equal(seen[0] + seen[1] + seen[2], 200);
    assert_true(seen[0] > 0 && seen[1] > 0 && seen[2] > 0);
    fx_close(&x);
}

/* Values drawn for 'n' buildings with 'seed', processed forwards or backwards. */
static char **draw_all(size_t n, uint64_t seed, int backwards)
{
    fx x;
    assert_int_equal(fx_open(&x, "defaults\n"
                                 "  everywhere set material URM 60%, RM 30%, TMB 10%\n"
                                 "  in region SOUTH set storeys 1 50%, 2 25%, 3 25%\n"
                                 "end\n"),
                     ST_OK);
    for (size_t i = 0; i < n; i++)
        add(&x, (int32_t)(i % 4), NULL, NULL, NULL);
    assert_int_equal(st_defaults_learn(x.d, x.fs, x.n), ST_OK);
    for (size_t k = 0; k < n; k++) {
        size_t i = backwards ? n - 1 - k : k;
        assert_int_equal(st_defaults_apply(x.d, x.ctx, x.fs[i], ST_FILL_DRAW, seed), ST_OK);
    }
    char **out = calloc(n, sizeof *out);
    assert_non_null(out);
    for (size_t i = 0; i < n; i++) {
        const st_field_value *m = &x.fs[i]->schema[F_MATERIAL], *s = &x.fs[i]->schema[F_STOREYS];
        size_t len = strlen(m->text) + 8;
        out[i] = malloc(len);
        snprintf(out[i], len, "%s/%s", m->text, s->text ? s->text : "-");
    }
    fx_close(&x);
    return out;
}

static void test_reproducible_by_seed(void **state)
{
    (void)state;
    enum { N = 400 };
    char **a = draw_all(N, 7, 0), **b = draw_all(N, 7, 1), **c = draw_all(N, 8, 0);
    size_t differ = 0;
    for (size_t i = 0; i < N; i++) {
        assert_string_equal(a[i], b[i]);          /* order does not matter */
        differ += strcmp(a[i], c[i]) != 0;        /* the seed does */
    }
    assert_true(differ > N / 4);
    for (size_t i = 0; i < N; i++) {
        free(a[i]);
        free(b[i]);
        free(c[i]);
    }
    free(a);
    free(b);
    free(c);
    /* the hash itself: in [0, 1), stable for a given (seed, bid, field) */
    double u = st_defaults_uniform(1, 2, 3);
    assert_true(u >= 0 && u < 1);
    assert_true(u == st_defaults_uniform(1, 2, 3));
    assert_true(u != st_defaults_uniform(1, 2, 4));
}

/*
** The chi-square goodness-of-fit test of the drawn shares. 30,000
** buildings draw material from URM 60 %, RM 30 %, TMB 10 % with seed
** 20240611. With k = 3 categories there are 2 degrees of freedom, for
** which the chi-square survival function is exp(-x/2) exactly, so the
** critical value at significance alpha = 0.001 is -2 ln(0.001) = 13.8155
** (tables give 13.816, e.g. NIST/SEMATECH e-Handbook of Statistical
** Methods, section 1.3.6.7.4). The draw passes when the statistic is below
** it. The same counts tested against slightly wrong shares (62/28/10, a
** biased draw) must exceed it: the test has the power to notice a bias of
** two percentage points.
*/
static double chi_square(const int *obs, const double *share, int k, int n)
{
    double x2 = 0;
    for (int i = 0; i < k; i++) {
        double e = share[i] * n;
        x2 += (obs[i] - e) * (obs[i] - e) / e;
    }
    return x2;
}

static void test_chi_square_of_drawn_shares(void **state)
{
    (void)state;
    enum { N = 30000 };
    const double alpha = 0.001, critical = -2.0 * log(alpha);
    assert_true(fabs(critical - 13.816) < 0.001);
    fx x;
    assert_int_equal(fx_open(&x, "defaults\n"
                                 "  in district NEW-2 set material URM 60%, RM 30%, TMB 10%\n"
                                 "end\n"),
                     ST_OK);
    for (int i = 0; i < N; i++)
        add(&x, 3, NULL, NULL, NULL);
    learn_and_apply(&x, ST_FILL_DRAW, 20240611);
    int obs[3] = {0, 0, 0};
    for (size_t i = 0; i < x.n; i++) {
        const char *v = x.fs[i]->schema[F_MATERIAL].text;
        assert_int_equal(x.fs[i]->schema[F_MATERIAL].from, ST_PROV_DRAWN);
        obs[!strcmp(v, "URM") ? 0 : !strcmp(v, "RM") ? 1 : 2]++;
    }
    const double stated[3] = {0.6, 0.3, 0.1}, biased[3] = {0.62, 0.28, 0.1};
    double x2 = chi_square(obs, stated, 3, N);
    printf("drawn %d/%d/%d of %d: chi-square %.3f (critical %.3f at alpha %.3f)\n", obs[0],
           obs[1], obs[2], N, x2, critical, alpha);
    assert_true(x2 < critical);
    assert_true(chi_square(obs, biased, 3, N) > critical);
    fx_close(&x);
}

/* ---- tables -------------------------------------------------------------- */

static void test_table(void **state)
{
    (void)state;
    write_file("d.csv",
               "scope,key,field,value,share,occupancy,storeys,note\n"
               "district,OLD-*,material,URM,70%,RES,1..2,survey 2019\n"
               "district,OLD-*,material,RM,30,RES,1..2,\n"
               "district,OLD-*,material,RC,,RES,3..,tall ones\n"
               "\"region\",\"SOUTH\",material,TMB,,,,\n"
               "everywhere,,material,RC,100,,,\n");
    fx x;
    char extra[800];
    snprintf(extra, sizeof extra,
             "defaults\n"
             "  in district OLD-2 when occupancy = COM set material URM\n"
             "  table \"d.csv\"\n"
             "end\n");
    assert_int_equal(fx_open(&x, extra), ST_OK);
    st_feature *a = add(&x, 0, "res", NULL, "2");     /* OLD-*, RES, 1..2 */
    st_feature *b = add(&x, 0, "res", NULL, "5");     /* OLD-*, RES, 3.. */
    st_feature *c = add(&x, 1, "com", NULL, NULL);    /* inline beats table */
    st_feature *d = add(&x, 1, "res", NULL, NULL);    /* storeys unknown: no range holds */
    st_feature *e = add(&x, 2, NULL, NULL, NULL);     /* region SOUTH */
    learn_and_apply(&x, ST_FILL_MOST_LIKELY, 1);
    expect(a, F_MATERIAL, "URM", ST_PROV_DEFAULT, "d.csv:2");
    expect(b, F_MATERIAL, "RC", ST_PROV_DEFAULT, "d.csv:4");
    expect(c, F_MATERIAL, "URM", ST_PROV_DEFAULT, "t.rules:22");
    expect(d, F_MATERIAL, "RC", ST_PROV_DEFAULT, "d.csv:6");
    expect(e, F_MATERIAL, "TMB", ST_PROV_DEFAULT, "d.csv:5");
    fx_close(&x);
}

/* A table that breaks a rule: fx_open returns the error; the diagnostic
** names the file and line and says 'what'. */
static void table_error(const char *csv, st_status want, long line, const char *what)
{
    write_file("bad.csv", csv);
    fx x;
    st_status rc = fx_open(&x, "defaults\n  table \"bad.csv\"\nend\n");
    if (rc != want)
        render_diags(&x.diags);
    assert_int_equal(rc, want);
    assert_null(x.d);
    int found = 0;
    for (size_t i = 0; i < x.diags.count; i++) {
        const st_diag *g = &x.diags.items[i];
        if (g->severity == ST_SEV_ERROR && g->line == line && strstr(g->file, "bad.csv") &&
            strstr(g->message, what))
            found = 1;
    }
    if (!found)
        render_diags(&x.diags);
    assert_true(found);
    fx_close(&x);
}

static void test_table_errors(void **state)
{
    (void)state;
    table_error("scope,key,field,value,share\n"
                "district,A,material,URM,60\n"
                "district,A,material,RM,30\n",
                ST_ERR_RULE, 2, "add up to 90%");
    table_error("scope,key,field,value,share\n"
                "district,A,material,URM,60\n"
                "district,A,material,RM,\n",
                ST_ERR_RULE, 2, "give a share on every row");
    table_error("scope,key,field,value,share\n\n\ndistrict,A,material,RCC,100\n",
                ST_ERR_RULE, 4, "'RCC' is not a value of field 'material'");
    table_error("scope,key,field,value,ocupancy\n", ST_ERR_RULE, 1, "'ocupancy' is neither");
    table_error("scope,key,value\n", ST_ERR_RULE, 1, "no 'field' column");
    table_error("scope,key,field,value\nplanet,,material,RC\n", ST_ERR_RULE, 2,
                "scope 'planet'");
    table_error("scope,key,field,value\neverywhere,X,material,RC\n", ST_ERR_RULE, 2,
                "takes no key");
    table_error("scope,key,field,value,storeys\ndistrict,A,material,RC,5..2\n", ST_ERR_RULE, 2,
                "is empty");
    table_error("scope,key,field,value,material\ndistrict,A,material,RC,URM\n", ST_ERR_RULE, 2,
                "cannot depend on 'material' itself");
    table_error("scope,key,field,value\ndistrict,A,material,RC\ndistrict,A,material,RC\n",
                ST_ERR_RULE, 3, "given twice");
    table_error("scope,key,field,value\ndistrict,A,material\n", ST_ERR_RULE, 2,
                "3 cells where the header has 4");
    table_error("scope,key,field,value\ndistrict,\"A,material,RC\n", ST_ERR_FORMAT, 2,
                "not closed");
    table_error("scope,key,field,value,share\ndistrict,A,material,RC,150\n", ST_ERR_RULE, 2,
                "share '150'");
}

/* ---- allocation failures ------------------------------------------------- */

static void test_alloc_failures(void **state)
{
    (void)state;
    write_file("oom.csv", "scope,key,field,value,share,occupancy\n"
                          "district,OLD-*,material,URM,50,RES\n"
                          "district,OLD-*,material,RM,50,RES\n"
                          "region,NORTH,storeys,2,,\n");
    const char *extra = "defaults\n"
                        "  in district NEW-* set material RC 50%, URM 50%\n"
                        "  table \"oom.csv\"\n"
                        "  learn storeys per district from 2 buildings\n"
                        "end\n";
    fx x;
    assert_int_equal(fx_open(&x, extra), ST_OK);
    for (int i = 0; i < 12; i++)
        add(&x, i % 4, i % 2 ? "res" : NULL, NULL, i % 3 ? "3" : NULL);
    st_defaults_free(x.d);
    x.d = NULL;
    int completed = 0;
    for (long n = 1; n < 2000 && !completed; n++) {
        st_defaults *d = NULL;
        st_defaults_places pl = {DKEYS, DREGIONS, 4};
        st_diags dg;
        st_diags_init(&dg);
        st_alloc_fail_after(n);
        st_status rc = st_defaults_new(x.rules, &pl, &dg, &d);
        if (rc == ST_OK)
            rc = st_defaults_learn(d, x.fs, x.n);
        for (size_t i = 0; rc == ST_OK && i < x.n; i++)
            rc = st_defaults_apply(d, x.ctx, x.fs[i], ST_FILL_DRAW, 3);
        st_alloc_fail_after(0);
        if (rc == ST_OK)
            completed = 1;
        else
            assert_int_equal(rc, ST_ERR_NOMEM);
        st_defaults_free(d);
        st_diags_free(&dg);
    }
    assert_true(completed);
    fx_close(&x);
}

static int setup(void **state)
{
    (void)state;
    snprintf(tmpdir, sizeof tmpdir, "%s/st-defaults-XXXXXX",
             getenv("TMPDIR") ? getenv("TMPDIR") : "/tmp");
    return mkdtemp(tmpdir) ? 0 : -1;
}

static int teardown(void **state)
{
    (void)state;
    return scratch_remove(tmpdir);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_precedence),
        cmocka_unit_test(test_fill_order),
        cmocka_unit_test(test_learned_with_fallback),
        cmocka_unit_test(test_fill_modes),
        cmocka_unit_test(test_reproducible_by_seed),
        cmocka_unit_test(test_chi_square_of_drawn_shares),
        cmocka_unit_test(test_table),
        cmocka_unit_test(test_table_errors),
        cmocka_unit_test(test_alloc_failures),
    };
    return cmocka_run_group_tests(tests, setup, teardown);
}
