/*
** tests/unit/test_audit.c -- the completeness audit on hand-made runs whose
** figures are worked out in the comments: counts per district and status,
** footprint and floor area, provenance shares, findings by severity and
** code, reference counts (ratio, under/over, absent on either side), the
** gate lines and --fail-on; the reference CSV reader and its errors with
** file:line; allocation failures. The same figures are recomputed from a
** real run's GeoPackage by tests/ref/test_audit_python.sh.
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

#include "stocktake/audit.h"
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

/* ---- reference counts ------------------------------------------------------- */

static void test_reference(void **state)
{
    (void)state;
    const char *p = write_file("ref.csv", "\xEF\xBB\xBF" "ward,houses,year,method\r\n"
                                          "A,5,2021,census\r\n"
                                          "\"B, old town\",1,2019,\"estimate, rough\"\r\n"
                                          "\r\n"
                                          "D,  7 ,2021,census\r\n");
    st_diags dg;
    st_diags_init(&dg);
    st_reference *r = NULL;
    assert_int_equal(st_reference_load(p, &dg, &r), ST_OK);
    assert_int_equal(st_reference_count(r), 3);
    uint64_t n;
    assert_string_equal(st_reference_key(r, 0, &n), "A");
    assert_int_equal(n, 5);
    assert_string_equal(st_reference_key(r, 1, &n), "B, old town");
    assert_int_equal(n, 1);
    assert_string_equal(st_reference_key(r, 2, &n), "D");   /* spaces trimmed */
    assert_int_equal(n, 7);
    st_reference_free(r);
    /* a header only: no rows, not an error */
    p = write_file("ref0.csv", "key,count\n");
    assert_int_equal(st_reference_load(p, &dg, &r), ST_OK);
    assert_int_equal(st_reference_count(r), 0);
    st_reference_free(r);
    st_diags_free(&dg);
}

static void reference_error(const char *text, st_status want, long line, const char *what)
{
    const char *p = write_file("bad.csv", text);
    st_diags dg;
    st_diags_init(&dg);
    st_reference *r = NULL;
    assert_int_equal(st_reference_load(p, &dg, &r), want);
    assert_null(r);
    assert_true(dg.count >= 1);
    if (dg.items[0].line != line || !strstr(dg.items[0].message, what))
        fail_msg("got line %ld '%s', want line %ld '%s'", dg.items[0].line,
                 dg.items[0].message, line, what);
    st_diags_free(&dg);
}

static void test_reference_errors(void **state)
{
    (void)state;
    reference_error("k,n\nA,5\nB,five\n", ST_ERR_FORMAT, 3, "not a whole number >= 0: 'five'");
    reference_error("k,n\nA,5\nB,-1\n", ST_ERR_FORMAT, 3, "'-1'");
    reference_error("k,n\nA,5\nB,2.5\n", ST_ERR_FORMAT, 3, "'2.5'");
    reference_error("k,n\nA,5\nB,\n", ST_ERR_FORMAT, 3, "not a whole number");
    reference_error("k,n\nA,5\n\nA,6\n", ST_ERR_FORMAT, 4, "given twice: 'A'");
    reference_error("k,n\nA\n", ST_ERR_FORMAT, 2, "needs a district key and an expected count");
    reference_error("k,n\n,4\n", ST_ERR_FORMAT, 2, "empty district key");
    reference_error("key\nA,4\n", ST_ERR_FORMAT, 1, "at least two columns");
    reference_error("", ST_ERR_FORMAT, 0, "empty");
    reference_error("k,n\n\"A,4\n", ST_ERR_FORMAT, 2, "not closed");
    reference_error("k,n\nA,4\nB\"x,5\n", ST_ERR_FORMAT, 3, "bad CSV");
    reference_error("k,n\nA\xff,4\n", ST_ERR_FORMAT, 2, "not UTF-8");
    st_diags dg;
    st_diags_init(&dg);
    st_reference *r = NULL;
    char missing[600];
    snprintf(missing, sizeof missing, "%s/none.csv", tmpdir);
    assert_int_equal(st_reference_load(missing, &dg, &r), ST_ERR_IO);
    st_diags_free(&dg);
}

/* ---- a hand-made run ------------------------------------------------------------ */

/*
** Districts A (region N), B (region N), C (region S), all unit squares.
** Schema: material (codes), storeys (integer).
** Features (bid: district, status, area, material from/value, storeys from/value):
**   1: A ok        100  source RC      source 2
**   2: A repaired   50  default URM    unknown
**   3: A duplicate  80  (set aside)
**   4: B ok         10  drawn TMB      default 3
**   5: B ok         20  unknown        derived 1
**   6: B ok         30  unknown        unknown
**   7: C rejected    0  (set aside)
**   8: none ok      40  source RC      drawn 4
** Findings: bid 1 error geom.x; bid 2 warning w.y; bid 2 note n.z; bid 8
** warning place.outside; bid 3 note dup.exact; bid 99 (no such building)
** warning w.y.
** Reference: A 5, B 1, D 9 (C has none; D is not in the layer).
*/
#define RULES_TEXT                                              \
    "schema\n"                                                  \
    "  field material codes RC URM TMB UNK\n"                   \
    "  field storeys integer 1..50\n"                           \
    "  unknown material UNK\n"                                  \
    "end\n"

typedef struct run {
    st_districts *d;
    st_rules *rules;
    st_reference *ref;
    st_feature *f[8];
    st_findings findings;
    st_diags diags;
} run;

static void set(st_feature *f, int field, const char *text, st_provenance from)
{
    st_free(f->schema[field].text);
    f->schema[field].text = text ? st_strdup(text) : NULL;
    f->schema[field].from = from;
}

static void run_open(run *r, const char *gate)
{
    memset(r, 0, sizeof *r);
    st_diags_init(&r->diags);
    st_findings_init(&r->findings);
    const char *dpath = write_file(
        "d.geojson",
        "{\"type\":\"FeatureCollection\",\"features\":["
        "{\"type\":\"Feature\",\"properties\":{\"k\":\"A\",\"r\":\"N\"},\"geometry\":{\"type\":"
        "\"Polygon\",\"coordinates\":[[[0,0],[1,0],[1,1],[0,1],[0,0]]]}},"
        "{\"type\":\"Feature\",\"properties\":{\"k\":\"B\",\"r\":\"N\"},\"geometry\":{\"type\":"
        "\"Polygon\",\"coordinates\":[[[1,0],[2,0],[2,1],[1,1],[1,0]]]}},"
        "{\"type\":\"Feature\",\"properties\":{\"k\":\"C\",\"r\":\"S\"},\"geometry\":{\"type\":"
        "\"Polygon\",\"coordinates\":[[[2,0],[3,0],[3,1],[2,1],[2,0]]]}}]}");
    st_districts_options o = {dpath, "k", "r", NULL};
    assert_int_equal(st_districts_load(&o, &r->diags, &r->d), ST_OK);
    char text[1024];
    snprintf(text, sizeof text, "%s%s", RULES_TEXT, gate ? gate : "");
    assert_int_equal(st_rules_load_text("a.rules", text, strlen(text), &r->diags, &r->rules),
                     ST_OK);
    const char *rpath = write_file("r.csv", "district,expected\nA,5\nB,1\nD,9\n");
    assert_int_equal(st_reference_load(rpath, &r->diags, &r->ref), ST_OK);
    static const struct {
        int district;
        st_feature_status st;
        double area;
        const char *mat;
        st_provenance mfrom;
        const char *sto;
        st_provenance sfrom;
    } rows[8] = {
        {0, ST_STATUS_OK, 100, "RC", ST_PROV_SOURCE, "2", ST_PROV_SOURCE},
        {0, ST_STATUS_REPAIRED, 50, "URM", ST_PROV_DEFAULT, NULL, ST_PROV_UNKNOWN},
        {0, ST_STATUS_DUPLICATE, 80, NULL, ST_PROV_UNKNOWN, NULL, ST_PROV_UNKNOWN},
        {1, ST_STATUS_OK, 10, "TMB", ST_PROV_DRAWN, "3", ST_PROV_DEFAULT},
        {1, ST_STATUS_OK, 20, "UNK", ST_PROV_UNKNOWN, "1", ST_PROV_DERIVED},
        {1, ST_STATUS_OK, 30, "UNK", ST_PROV_UNKNOWN, NULL, ST_PROV_UNKNOWN},
        {2, ST_STATUS_REJECTED, 0, NULL, ST_PROV_UNKNOWN, NULL, ST_PROV_UNKNOWN},
        {-1, ST_STATUS_OK, 40, "RC", ST_PROV_SOURCE, "4", ST_PROV_DRAWN},
    };
    for (int i = 0; i < 8; i++) {
        st_feature *f = r->f[i] = st_feature_new();
        assert_non_null(f);
        f->bid = (uint64_t)i + 1;
        f->district = rows[i].district;
        f->status = rows[i].st;
        f->area_m2 = rows[i].area;
        f->nschema = 2;
        f->schema = st_calloc(2, sizeof *f->schema);
        assert_non_null(f->schema);
        set(f, 0, rows[i].mat, rows[i].mfrom);
        set(f, 1, rows[i].sto, rows[i].sfrom);
    }
    static const struct {
        uint64_t bid;
        const char *code;
        st_severity sev;
    } fnd[] = {{1, "geom.x", ST_SEV_ERROR}, {2, "w.y", ST_SEV_WARNING}, {2, "n.z", ST_SEV_NOTE},
               {8, "place.outside", ST_SEV_WARNING}, {3, "dup.exact", ST_SEV_NOTE},
               {99, "w.y", ST_SEV_WARNING}};
    for (size_t i = 0; i < sizeof fnd / sizeof fnd[0]; i++)
        assert_int_equal(st_findings_add(&r->findings, fnd[i].bid, fnd[i].code, fnd[i].sev, NAN,
                                         NAN, "m"),
                         ST_OK);
}

static void run_close(run *r)
{
    for (int i = 0; i < 8; i++)
        st_feature_free(r->f[i]);
    st_findings_free(&r->findings);
    st_reference_free(r->ref);
    st_rules_free(r->rules);
    st_districts_free(r->d);
    st_diags_free(&r->diags);
}

static st_audit *compute(run *r, int fail_on)
{
    st_audit_input in = {r->f, 8, &r->findings, r->d, r->rules, NULL, NULL, r->ref, fail_on};
    st_audit *a = NULL;
    assert_int_equal(st_audit_compute(&in, &r->diags, &a), ST_OK);
    return a;
}

static const st_audit_code *code_of(const st_audit_code *c, size_t n, const char *code)
{
    for (size_t i = 0; i < n; i++)
        if (!strcmp(c[i].code, code))
            return &c[i];
    return NULL;
}

static void test_figures(void **state)
{
    (void)state;
    run r;
    run_open(&r, NULL);
    st_audit *a = compute(&r, -1);
    /* A, B, C from the layer; D from the reference; none last */
    assert_int_equal(a->ndistricts, 5);
    assert_int_equal(a->nlayer_districts, 3);
    assert_true(a->has_reference);
    assert_int_equal(a->nfields, 2);
    assert_int_equal(a->storeys_field, 1);
    const st_audit_district *A = &a->districts[0], *B = &a->districts[1], *C = &a->districts[2],
                            *D = &a->districts[3], *none = &a->districts[4];
    assert_string_equal(A->key, "A");
    assert_string_equal(A->region, "N");
    assert_non_null(A->geom);
    assert_string_equal(D->key, "D");
    assert_null(D->geom);
    assert_string_equal(none->key, "none");
    /* counts */
    assert_int_equal(A->buildings, 2);
    assert_int_equal(A->repaired, 1);
    assert_int_equal(A->duplicate, 1);
    assert_int_equal(A->rejected, 0);
    assert_int_equal(B->buildings, 3);
    assert_int_equal(C->buildings, 0);
    assert_int_equal(C->rejected, 1);
    assert_int_equal(none->buildings, 1);
    assert_int_equal(a->total.buildings, 6);
    assert_int_equal(a->total.duplicate + a->total.rejected, 2);
    /* areas: A 100 + 50; floor area only where storeys is known:
    ** A 100 x 2 = 200; B 10 x 3 + 20 x 1 = 50; none 40 x 4 = 160 */
    assert_true(fabs(A->footprint_m2 - 150) < 1e-9);
    assert_true(fabs(B->footprint_m2 - 60) < 1e-9);
    assert_true(fabs(A->floor_m2 - 200) < 1e-9);
    assert_int_equal(A->floor_known, 1);
    assert_true(fabs(B->floor_m2 - 50) < 1e-9);
    assert_int_equal(B->floor_known, 2);
    assert_true(fabs(a->total.floor_m2 - 410) < 1e-9);
    assert_true(fabs(a->total.footprint_m2 - 250) < 1e-9);
    /* provenance of material in B: drawn 1, unknown 2; storeys in B:
    ** default 1, derived 1, unknown 1 */
    assert_int_equal(B->fields[0].by_prov[ST_PROV_DRAWN], 1);
    assert_int_equal(B->fields[0].by_prov[ST_PROV_UNKNOWN], 2);
    assert_int_equal(B->fields[1].by_prov[ST_PROV_DEFAULT], 1);
    assert_int_equal(B->fields[1].by_prov[ST_PROV_DERIVED], 1);
    assert_int_equal(B->fields[1].by_prov[ST_PROV_UNKNOWN], 1);
    assert_int_equal(a->total.fields[0].by_prov[ST_PROV_SOURCE], 2);
    assert_int_equal(a->total.fields[1].by_prov[ST_PROV_DRAWN], 1);
    /* findings: A has bid 1 (error), bid 2 (warning, note), bid 3 (note) */
    assert_int_equal(A->findings[ST_SEV_ERROR], 1);
    assert_int_equal(A->findings[ST_SEV_WARNING], 1);
    assert_int_equal(A->findings[ST_SEV_NOTE], 2);
    /* none: bid 8's place.outside and the finding about no building */
    assert_int_equal(none->findings[ST_SEV_WARNING], 2);
    assert_int_equal(a->total.findings[ST_SEV_WARNING], 3);
    assert_int_equal(A->ncodes, 4);
    assert_int_equal(code_of(a->codes, a->ncodes, "w.y")->count, 2);
    assert_string_equal(a->codes[0].code, "w.y");            /* most frequent first */
    assert_non_null(code_of(none->codes, none->ncodes, "place.outside"));
    /* reference: A 2/5 = 0.4 under 0.5; B 3/1 = 3 over 1.5; C none; D absent */
    assert_true(fabs(a->under_ratio - 0.5) < 1e-12);
    assert_true(fabs(a->over_ratio - 1.5) < 1e-12);
    assert_int_equal(A->expected, 5);
    assert_true(fabs(A->ratio - 0.4) < 1e-12);
    assert_int_equal(A->ref, ST_REF_UNDER);
    assert_int_equal(B->ref, ST_REF_OVER);
    assert_true(fabs(B->ratio - 3.0) < 1e-12);
    assert_int_equal(C->ref, ST_REF_NONE);
    assert_int_equal(C->expected, -1);
    assert_true(isnan(C->ratio));
    assert_int_equal(D->ref, ST_REF_ABSENT);
    assert_int_equal(D->expected, 9);
    assert_true(fabs(D->ratio) < 1e-12);
    assert_int_equal(a->nref_unknown, 1);
    assert_string_equal(a->ref_unknown[0], "D");
    assert_int_equal(a->total.expected, 15);
    assert_true(fabs(a->total.ratio - 6.0 / 15.0) < 1e-12);
    /* no gate lines, no --fail-on */
    assert_int_equal(a->ngates, 0);
    assert_false(a->gate_failed);
    assert_string_equal(st_ref_state_name(ST_REF_UNDER), "under");
    st_audit_free(a);
    run_close(&r);
}

static void test_gates(void **state)
{
    (void)state;
    run r;
    run_open(&r, "gate\n"
                 "  fail when share(warning) > 40%\n"       /* line 7 */
                 "  warn when completeness(storeys) < 90%\n"
                 "  warn when observed(material) < 50%\n"
                 "  fail when district-completeness < 35%\n"
                 "  warn when district-completeness > 2.5\n"
                 "end\n");
    st_audit *a = compute(&r, ST_SEV_ERROR);
    /* thresholds from the gate lines */
    assert_true(fabs(a->under_ratio - 0.35) < 1e-12);
    assert_true(fabs(a->over_ratio - 2.5) < 1e-12);
    assert_int_equal(a->districts[0].ref, ST_REF_OK);      /* 0.4 >= 0.35 */
    assert_int_equal(a->districts[1].ref, ST_REF_OVER);    /* 3 > 2.5 */
    assert_int_equal(a->ngates, 6);
    /* share(warning): kept buildings with a warning or worse: 1, 2, 8 = 3 of 6 */
    assert_true(fabs(a->gates[0].value - 0.5) < 1e-12);
    assert_false(a->gates[0].passed);
    assert_true(a->gates[0].fails);
    assert_string_equal(a->gates[0].rule, "a.rules:7");
    /* completeness(storeys): 4 of 6 known */
    assert_true(fabs(a->gates[1].value - 4.0 / 6.0) < 1e-12);
    assert_false(a->gates[1].passed);
    assert_false(a->gates[1].fails);
    /* observed(material): source 2 of 6 */
    assert_true(fabs(a->gates[2].value - 2.0 / 6.0) < 1e-12);
    assert_false(a->gates[2].passed);
    /* district-completeness < 35%: lowest ratio 0.4 (A): passes */
    assert_true(fabs(a->gates[3].value - 0.4) < 1e-12);
    assert_true(a->gates[3].passed);
    assert_non_null(strstr(a->gates[3].detail, "A"));
    /* > 2.5: highest 3.0 (B): holds, a warning */
    assert_true(fabs(a->gates[4].value - 3.0) < 1e-12);
    assert_false(a->gates[4].passed);
    assert_non_null(strstr(a->gates[4].detail, "B"));
    /* --fail-on error: one error finding */
    assert_string_equal(a->gates[5].rule, "--fail-on");
    assert_true(fabs(a->gates[5].value - 1) < 1e-12);
    assert_false(a->gates[5].passed);
    assert_true(a->gate_failed);
    st_audit_free(a);
    run_close(&r);
}

/* Without rules or districts everything is in "none"; the gate passes. */
static void test_bare_run(void **state)
{
    (void)state;
    run r;
    run_open(&r, NULL);
    for (int i = 0; i < 8; i++) {   /* a run without rules has no schema values */
        st_feature *f = r.f[i];
        for (uint32_t k = 0; k < f->nschema; k++)
            st_free(f->schema[k].text);
        st_free(f->schema);
        f->schema = NULL;
        f->nschema = 0;
        f->district = -1;
    }
    st_audit_input in = {r.f, 8, &r.findings, NULL, NULL, NULL, NULL, NULL, -1};
    st_audit *a = NULL;
    assert_int_equal(st_audit_compute(&in, &r.diags, &a), ST_OK);
    assert_int_equal(a->ndistricts, 1);
    assert_int_equal(a->nlayer_districts, 0);
    assert_int_equal(a->districts[0].buildings, 6);
    assert_int_equal(a->nfields, 0);
    assert_int_equal(a->storeys_field, -1);
    assert_false(a->has_reference);
    assert_false(a->gate_failed);
    st_audit_free(a);
    run_close(&r);
}

static void test_alloc_failures(void **state)
{
    (void)state;
    run r;
    run_open(&r, "gate\n  fail when district-completeness < 35%\nend\n");
    const char *rpath = write_file("r2.csv", "district,expected\nA,5\nB,1\nD,9\n");
    int completed = 0;
    for (long n = 1; n < 3000 && !completed; n++) {
        st_reference *ref = NULL;
        st_audit *a = NULL;
        st_diags dg;
        st_diags_init(&dg);
        st_alloc_fail_after(n);
        st_status rc = st_reference_load(rpath, &dg, &ref);
        if (rc == ST_OK) {
            st_audit_input in = {r.f, 8, &r.findings, r.d, r.rules, NULL, NULL, ref,
                                 ST_SEV_WARNING};
            rc = st_audit_compute(&in, &dg, &a);
        }
        st_alloc_fail_after(0);
        if (rc == ST_OK) {
            completed = 1;
            assert_int_equal(a->ndistricts, 5);
        } else
            assert_int_equal(rc, ST_ERR_NOMEM);
        st_audit_free(a);
        st_reference_free(ref);
        st_diags_free(&dg);
    }
    assert_true(completed);
    run_close(&r);
}

static int setup(void **state)
{
    (void)state;
    snprintf(tmpdir, sizeof tmpdir, "%s/st-audit-XXXXXX",
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
        cmocka_unit_test(test_reference),
        cmocka_unit_test(test_reference_errors),
        cmocka_unit_test(test_figures),
        cmocka_unit_test(test_gates),
        cmocka_unit_test(test_bare_run),
        cmocka_unit_test(test_alloc_failures),
    };
    return cmocka_run_group_tests(tests, setup, teardown);
}
