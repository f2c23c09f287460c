/*
** tests/unit/test_report.c -- the report writers on a hand-made audit:
** report.json parsed back (YAJL's tree parser) and its figures checked,
** report.html's map shapes, escaping and self-containment, the terminal
** summary, the palettes' lightness steps (CIE L*), the map projection
** against PROJ's cs2cs, ring simplification, distributions, writing under
** temporary names, and allocation failure.
*/
#include <math.h>
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>
#include <cmocka.h>

#include <yajl/yajl_tree.h>

#include "report/reportInt.h"
#include "stocktake/report.h"

/* ---- fixture: a run with four districts and the unassigned bucket -------- */

enum { NF = 3, ND = 5 };

typedef struct fixture {
    st_run_layer layers[2];
    st_run_code_count codes[3];
    st_run_result run;
    st_geom geoms[4];
    st_audit_field fields[ND + 1][NF];
    st_audit_district districts[ND];
    char *field_names[NF];
    st_audit_count unmapped[2];
    st_audit_learned learned[1];
    st_audit_gate gates[3];
    char *ref_unknown[1];
    st_audit audit;
    st_report_dist dist;
    st_report_file files[1];
    const char *outputs[3];
    st_report_input in;
} fixture;

static void add_ring(st_geom *g, const double *xy, size_t n)
{
    assert_int_equal(st_geom_begin_ring(g), ST_OK);
    for (size_t i = 0; i < n; i++)
        assert_int_equal(st_geom_add_xy(g, xy[2 * i], xy[2 * i + 1]), ST_OK);
}

/* A square cell of a 2x2 grid near the demo town's latitude. */
static void cell(st_geom *g, int cx, int cy)
{
    double x0 = -126.25 + 0.01 * cx, y0 = -47.92 + 0.01 * cy, d = 0.01;
    double ring[] = {x0, y0, x0 + d, y0, x0 + d, y0 + d, x0, y0 + d, x0, y0};
    st_geom_init(g);
    g->type = ST_GEOM_POLYGON;
    assert_int_equal(st_geom_begin_part(g), ST_OK);
    add_ring(g, ring, 5);
}

static void set_prov(st_audit_field *f, uint64_t src, uint64_t der, uint64_t def, uint64_t drw,
                     uint64_t unk)
{
    f->by_prov[ST_PROV_SOURCE] = src;
    f->by_prov[ST_PROV_DERIVED] = der;
    f->by_prov[ST_PROV_DEFAULT] = def;
    f->by_prov[ST_PROV_DRAWN] = drw;
    f->by_prov[ST_PROV_UNKNOWN] = unk;
}

static fixture *make_fixture(void)
{
    fixture *x = calloc(1, sizeof *x);
    assert_non_null(x);
    x->layers[0] = (st_run_layer){(char *)"osm", (char *)"buildings_osm.geojson",
                                  (char *)"GeoJSON", (char *)"EPSG:4326", 120, 100, 4, 15, 5};
    x->layers[1] = (st_run_layer){(char *)"cadastre", (char *)"cad.shp",
                                  (char *)"ESRI Shapefile", (char *)"EPSG:32709", 30, 30, 0, 0, 0};
    x->codes[0] = (st_run_code_count){"dup.exact", ST_SEV_WARNING, 15};
    x->codes[1] = (st_run_code_count){"geom.self-intersection", ST_SEV_ERROR, 5};
    x->codes[2] = (st_run_code_count){"attr.unmapped", ST_SEV_NOTE, 2};
    x->run.layers = x->layers;
    x->run.nlayers = 2;
    x->run.codes = x->codes;
    x->run.ncodes = 3;
    x->run.findings[ST_SEV_NOTE] = 2;
    x->run.findings[ST_SEV_WARNING] = 15;
    x->run.findings[ST_SEV_ERROR] = 5;
    x->run.gate_failed = 1;
    x->run.gate_reason = (char *)"share(error) > 0.02";

    for (int i = 0; i < 4; i++)
        cell(&x->geoms[i], i % 2, i / 2);
    static const char *const keys[ND] = {"QM01", "QM02", "Q<&>\"3", "QM04", "none"};
    static const int64_t expected[ND] = {60, 50, -1, 10, -1};
    static const uint64_t kept[ND] = {55, 20, 30, 20, 5};
    static const st_ref_state refs[ND] = {ST_REF_OK, ST_REF_UNDER, ST_REF_NONE, ST_REF_OVER,
                                          ST_REF_NONE};
    for (int d = 0; d < ND; d++) {
        st_audit_district *D = &x->districts[d];
        D->key = (char *)keys[d];
        D->region = d < 2 ? (char *)"QN" : d < 4 ? (char *)"QS" : NULL;
        D->geom = d < 4 ? &x->geoms[d] : NULL;
        D->buildings = kept[d];
        D->expected = expected[d];
        D->ratio = expected[d] > 0 ? (double)kept[d] / (double)expected[d] : NAN;
        D->ref = refs[d];
        D->footprint_m2 = 100.25 * (double)kept[d];
        D->floor_m2 = 200.5 * (double)kept[d];
        D->floor_known = kept[d];
        D->findings[ST_SEV_ERROR] = d == 1 ? 5 : 0;
        D->findings[ST_SEV_WARNING] = 3;
        D->fields = x->fields[d];
        for (int f = 0; f < NF; f++)   /* source, derived, default, drawn, unknown */
            set_prov(&x->fields[d][f], kept[d] / 2, 0, kept[d] / 4, 0,
                     kept[d] - kept[d] / 2 - kept[d] / 4);
    }
    x->districts[0].repaired = 4;
    x->districts[1].duplicate = 15;
    x->districts[1].rejected = 5;
    st_audit_district *T = &x->audit.total;
    T->key = (char *)"all";
    T->buildings = 130;
    T->expected = 120;
    T->ratio = 130.0 / 120;
    T->repaired = 4;
    T->duplicate = 15;
    T->rejected = 5;
    T->fields = x->fields[ND];
    for (int f = 0; f < NF; f++) {
        uint64_t s = 0, def = 0, unk = 0;
        for (int d = 0; d < ND; d++) {
            s += x->fields[d][f].by_prov[ST_PROV_SOURCE];
            def += x->fields[d][f].by_prov[ST_PROV_DEFAULT];
            unk += x->fields[d][f].by_prov[ST_PROV_UNKNOWN];
        }
        set_prov(&x->fields[ND][f], s, 0, def, 0, unk);
    }
    x->field_names[0] = (char *)"occupancy";
    x->field_names[1] = (char *)"material";
    x->field_names[2] = (char *)"storeys";
    x->audit.fields = x->field_names;
    x->audit.nfields = NF;
    x->audit.storeys_field = 2;
    x->audit.districts = x->districts;
    x->audit.ndistricts = ND;
    x->unmapped[0] = (st_audit_count){(char *)"occupancy", (char *)"casa <b>", 7};
    x->unmapped[1] = (st_audit_count){(char *)"material", (char *)"taipa", 3};
    x->audit.unmapped = x->unmapped;
    x->audit.nunmapped = 2;
    x->learned[0] = (st_audit_learned){(char *)"QM01", (char *)"material", 40,
                                       (char *)"URM 60%, RM 40%", 0, NULL};
    x->audit.learned = x->learned;
    x->audit.nlearned = 1;
    x->gates[0] = (st_audit_gate){(char *)"share(error) > 0.02", (char *)"demo.rules:40",
                                  0.038, 0.02, 0, 1, (char *)"share(error) = 0.038 > 0.02"};
    x->gates[1] = (st_audit_gate){(char *)"completeness(occupancy) < 50%",
                                  (char *)"demo.rules:41", 0.75, 0.5, 1, 1, NULL};
    x->gates[2] = (st_audit_gate){(char *)"observed(material) < 60%", (char *)"demo.rules:42",
                                  0.492, 0.6, 0, 0, NULL};
    x->audit.gates = x->gates;
    x->audit.ngates = 3;
    x->audit.gate_failed = 1;
    x->audit.under_ratio = 0.8;
    x->audit.over_ratio = 1.2;
    x->ref_unknown[0] = (char *)"QM99";
    x->audit.ref_unknown = x->ref_unknown;
    x->audit.nref_unknown = 1;

    x->dist.buildings = 130;
    x->dist.area[2] = 30;
    x->dist.area[5] = 100;
    x->dist.has_storeys = 1;
    x->dist.storeys_observed[1] = 60;
    x->dist.storeys_assumed[2] = 30;
    x->dist.storeys_unknown = 40;

    x->files[0] = (st_report_file){"input", "buildings_osm.geojson", "ab12", 1234};
    x->outputs[0] = "out/town.gpkg";
    x->outputs[1] = "out/report/report.json";
    x->outputs[2] = "out/report/report.html";
    x->in = (st_report_input){&x->run, &x->audit, &x->dist, x->files, 1,
                              "stocktake run -o out/town.gpkg --report out/report in.geojson",
                              "2024-05-01T10:00:00Z", "2024-05-01T10:00:09Z", 1, 73,
                              x->outputs, 3};
    return x;
}

static void free_fixture(fixture *x)
{
    for (int i = 0; i < 4; i++)
        st_geom_clear(&x->geoms[i]);
    free(x);
}

/* ---- helpers --------------------------------------------------------------- */

static size_t count_of(const char *hay, const char *needle)
{
    size_t n = 0;
    for (const char *p = strstr(hay, needle); p; p = strstr(p + 1, needle))
        n++;
    return n;
}

static yajl_val jget(yajl_val root, const char *a, const char *b, const char *c)
{
    const char *path[4] = {a, b, c, NULL};
    return yajl_tree_get(root, path, yajl_t_any);
}

static long long jint(yajl_val root, const char *a, const char *b, const char *c)
{
    yajl_val v = jget(root, a, b, c);
    assert_non_null(v);
    assert_true(YAJL_IS_INTEGER(v));
    return YAJL_GET_INTEGER(v);
}

static yajl_val parse_json(const st_report_input *in, st_buf *b)
{
    st_buf_init(b, 0);
    assert_int_equal(st_report_json(in, b), ST_OK);
    char err[256];
    yajl_val root = yajl_tree_parse(b->data, err, sizeof err);
    if (!root)
        fail_msg("report.json does not parse: %s", err);
    return root;
}

/* ---- report.json ------------------------------------------------------------ */

static void test_json_figures(void **state)
{
    (void)state;
    fixture *x = make_fixture();
    st_buf b;
    yajl_val root = parse_json(&x->in, &b);
    assert_int_equal(jint(root, "schema_version", NULL, NULL), ST_REPORT_SCHEMA_VERSION);
    assert_int_equal(jint(root, "run", "seed", NULL), 73);
    /* the balance: read = buildings + set_aside, summed over the layers */
    assert_int_equal(jint(root, "balance", "total", "read"), 150);
    assert_int_equal(jint(root, "balance", "total", "buildings"), 130);
    assert_int_equal(jint(root, "balance", "total", "set_aside"), 20);
    assert_true(YAJL_IS_TRUE(jget(root, "balance", "total", "balanced")));
    assert_int_equal(jint(root, "findings", "by_severity", "error"), 5);
    assert_int_equal(jint(root, "findings", "total", NULL), 22);
    yajl_val ds = jget(root, "districts", NULL, NULL);
    assert_true(YAJL_IS_ARRAY(ds));
    assert_int_equal(YAJL_GET_ARRAY(ds)->len, ND);
    /* a district without reference: ratio null, state none; keys unescaped */
    yajl_val d3 = YAJL_GET_ARRAY(ds)->values[2];
    const char *kp[] = {"key", NULL}, *rp[] = {"reference", "ratio", NULL};
    assert_string_equal(YAJL_GET_STRING(yajl_tree_get(d3, kp, yajl_t_string)), "Q<&>\"3");
    assert_true(YAJL_IS_NULL(yajl_tree_get(d3, rp, yajl_t_any)));
    yajl_val d2 = YAJL_GET_ARRAY(ds)->values[1];
    yajl_val ratio = yajl_tree_get(d2, rp, yajl_t_number);
    assert_non_null(ratio);
    assert_true(fabs(YAJL_GET_DOUBLE(ratio) - 0.4) < 1e-9);
    /* footprint area with two decimals */
    const char *fp[] = {"footprint_m2", NULL};
    assert_true(fabs(YAJL_GET_DOUBLE(yajl_tree_get(d2, fp, yajl_t_number)) - 2005.0) < 1e-9);
    /* assumed share of QM01: 13 of 55 values a field are default */
    yajl_val d1 = YAJL_GET_ARRAY(ds)->values[0];
    const char *ap[] = {"assumed_share", NULL};
    assert_true(fabs(YAJL_GET_DOUBLE(yajl_tree_get(d1, ap, yajl_t_number)) - 13.0 / 55) < 1e-6);
    assert_true(YAJL_IS_TRUE(jget(root, "gate", "failed", NULL)));
    yajl_val gates = jget(root, "gate", "results", NULL);
    assert_int_equal(YAJL_GET_ARRAY(gates)->len, 3);
    yajl_val fields = jget(root, "fields", NULL, NULL);
    assert_int_equal(YAJL_GET_ARRAY(fields)->len, NF);
    assert_int_equal(jint(root, "distributions", "storeys", "unknown"), 40);
    yajl_val absent = jget(root, "reference", "absent", NULL);
    assert_string_equal(YAJL_GET_STRING(YAJL_GET_ARRAY(absent)->values[0]), "QM99");
    yajl_tree_free(root);
    st_buf_free(&b);
    free_fixture(x);
}

static void test_json_without_audit(void **state)
{
    (void)state;
    fixture *x = make_fixture();
    x->in.audit = NULL;
    x->in.dist = NULL;
    x->in.has_seed = 0;
    st_buf b;
    yajl_val root = parse_json(&x->in, &b);
    assert_true(YAJL_IS_NULL(jget(root, "run", "seed", NULL)));
    assert_int_equal(YAJL_GET_ARRAY(jget(root, "districts", NULL, NULL))->len, 0);
    assert_true(YAJL_IS_NULL(jget(root, "distributions", NULL, NULL)));
    /* without an audit the gate comes from the run's --fail-on outcome */
    assert_true(YAJL_IS_TRUE(jget(root, "gate", "failed", NULL)));
    assert_int_equal(YAJL_GET_ARRAY(jget(root, "gate", "results", NULL))->len, 1);
    yajl_tree_free(root);
    st_buf_free(&b);
    free_fixture(x);
}

static void test_json_invalid_utf8_replaced(void **state)
{
    (void)state;
    fixture *x = make_fixture();
    x->unmapped[1].value = (char *)"bad\xC3(";
    st_buf b;
    yajl_val root = parse_json(&x->in, &b);
    yajl_val u = jget(root, "unmapped", NULL, NULL);
    const char *vp[] = {"value", NULL};
    assert_string_equal(YAJL_GET_STRING(yajl_tree_get(YAJL_GET_ARRAY(u)->values[1], vp,
                                                      yajl_t_string)),
                        "bad\xEF\xBF\xBD(");
    yajl_tree_free(root);
    st_buf_free(&b);
    free_fixture(x);
}

/* ---- report.html -------------------------------------------------------------- */

static void test_html_map_and_escaping(void **state)
{
    (void)state;
    fixture *x = make_fixture();
    st_buf b;
    st_buf_init(&b, 0);
    assert_int_equal(st_report_html(&x->in, &b), ST_OK);
    const char *h = b.data;
    const char *dump = getenv("ST_REPORT_DUMP");   /* to look at the page by hand */
    if (dump) {
        FILE *fp = fopen(dump, "w");
        assert_non_null(fp);
        fputs(h, fp);
        fclose(fp);
    }
    /* one shape per district with a polygon; the unassigned bucket has none */
    assert_int_equal(count_of(h, "<path class=\"district "), 4);
    assert_int_equal(count_of(h, "data-key=\""), 4);
    /* classes: QM01 55/60 = 0.92 -> top class, 13/55 assumed -> a1; QM02 0.4 -> r1,
    ** 5/20 assumed -> a2; no reference -> rn; QM04 over-mapped: dashed class */
    assert_non_null(strstr(h, "<path class=\"district r4 a1\" data-key=\"QM01\""));
    assert_non_null(strstr(h, "<path class=\"district r1 a2\" data-key=\"QM02\""));
    assert_non_null(strstr(h, "<path class=\"district rn a1\" data-key=\"Q&lt;&amp;&gt;&quot;3\""));
    assert_non_null(strstr(h, "r4 a2 over\" data-key=\"QM04\""));
    /* data is escaped everywhere */
    assert_null(strstr(h, "casa <b>"));
    assert_non_null(strstr(h, "casa &lt;b&gt;"));
    assert_null(strstr(h, "Q<&>"));
    /* self-contained: no URL schemes or protocol-relative references */
    assert_null(strstr(h, "http:"));
    assert_null(strstr(h, "https:"));
    assert_null(strstr(h, "src=\""));
    assert_null(strstr(h, "href=\"/"));
    assert_int_equal(count_of(h, "<script"), 1);
    /* headline, the failed gate and by how much, cautions, print style */
    assert_non_null(strstr(h, "Gate failed"));
    assert_non_null(strstr(h, "share(error) = 0.038 &gt; 0.02"));
    assert_non_null(strstr(h, "share(error) = 0.038 &gt; 0.02 (off by 0.018)"));
    /* the warn line that held is a warning, not a failure */
    assert_non_null(strstr(h, "Warnings (they do not fail the run)"));
    assert_non_null(strstr(h, "<td class=\"warn-cell\">warning</td>"));
    assert_non_null(strstr(h, "licensed engineers"));
    assert_non_null(strstr(h, "@media print"));
    /* hover figures of QM02 */
    assert_non_null(strstr(h, "reference: 50, completeness ratio 40% (under-mapped)"));
    /* district table: one body row per district, the bucket and total in the foot */
    assert_int_equal(count_of(h, "<tr class=\"under\">"), 1);
    assert_non_null(strstr(h, "<td>no district</td>"));
    st_buf_free(&b);
    free_fixture(x);
}

static void test_html_without_audit(void **state)
{
    (void)state;
    fixture *x = make_fixture();
    x->in.audit = NULL;
    x->in.dist = NULL;
    x->run.gate_failed = 0;
    x->run.gate_reason = NULL;
    st_buf b;
    st_buf_init(&b, 0);
    assert_int_equal(st_report_html(&x->in, &b), ST_OK);
    assert_int_equal(count_of(b.data, "class=\"district "), 0);
    assert_non_null(strstr(b.data, "so there is no map"));
    assert_non_null(strstr(b.data, "Gate passed"));
    assert_non_null(strstr(b.data, "No gate condition was evaluated"));
    st_buf_free(&b);
    free_fixture(x);
}

/* The d attribute of the district path with key 'key' (owned by the caller). */
static char *path_d(const char *html, const char *key)
{
    char needle[64];
    snprintf(needle, sizeof needle, "data-key=\"%s\" d=\"", key);
    const char *p = strstr(html, needle);
    if (!p)
        return NULL;
    p += strlen(needle);
    const char *e = strchr(p, '"');
    return strndup(p, (size_t)(e - p));
}

/* A multipolygon with a hole is one path of three rings; a district only
** the reference names is in the table but not on the map. */
static void test_html_multipolygon_and_absent(void **state)
{
    (void)state;
    fixture *x = make_fixture();
    st_geom *g = &x->geoms[0];
    st_geom_clear(g);
    g->type = ST_GEOM_MULTIPOLYGON;
    double shell[] = {-126.25, -47.92, -126.24, -47.92, -126.24, -47.91, -126.25, -47.91, -126.25, -47.92};
    double hole[] = {-126.248, -47.918, -126.248, -47.912, -126.242, -47.912, -126.242, -47.918,
                     -126.248, -47.918};
    double island[] = {-126.23, -47.93, -126.229, -47.93, -126.229, -47.929, -126.23, -47.93};
    assert_int_equal(st_geom_begin_part(g), ST_OK);
    add_ring(g, shell, 5);
    add_ring(g, hole, 5);
    assert_int_equal(st_geom_begin_part(g), ST_OK);
    add_ring(g, island, 4);
    x->districts[2].geom = NULL;
    x->districts[2].ref = ST_REF_ABSENT;
    x->districts[2].expected = 40;
    x->districts[2].buildings = 0;
    x->districts[2].ratio = 0;
    st_buf b;
    st_buf_init(&b, 0);
    assert_int_equal(st_report_html(&x->in, &b), ST_OK);
    assert_int_equal(count_of(b.data, "<path class=\"district "), 3);
    char *d = path_d(b.data, "QM01");
    assert_non_null(d);
    assert_int_equal(count_of(d, "M"), 3);
    assert_int_equal(count_of(d, "Z"), 3);
    free(d);
    assert_non_null(strstr(b.data, "not in the district layer"));
    st_buf_clear(&b);
    assert_int_equal(st_report_text(&x->in, &b), ST_OK);
    assert_non_null(strstr(b.data, "districts: 3; outside every district: 5 buildings"));
    st_buf_free(&b);
    free_fixture(x);
}

/* Many districts: one shape each, no labels, the table capped; a ring of
** 20,000 vertices is simplified to what the screen can show. */
static void test_html_many_districts(void **state)
{
    (void)state;
    fixture *x = make_fixture();
    enum { N = ST_REPORT_HTML_MAX_DISTRICTS + 10 };
    st_audit_district *ds = calloc(N, sizeof *ds);
    st_geom *gs = calloc(N, sizeof *gs);
    assert_non_null(ds);
    assert_non_null(gs);
    static char keys[N][8];
    for (int i = 0; i < N; i++) {
        snprintf(keys[i], sizeof keys[i], "D%03d", i);
        ds[i] = x->districts[0];
        ds[i].key = keys[i];
        if (i == 0) {   /* a circle-like ring with 20,000 vertices */
            st_geom_init(&gs[0]);
            gs[0].type = ST_GEOM_POLYGON;
            assert_int_equal(st_geom_begin_part(&gs[0]), ST_OK);
            assert_int_equal(st_geom_begin_ring(&gs[0]), ST_OK);
            for (int k = 0; k <= 20000; k++) {
                double t = 2 * M_PI * (k % 20000) / 20000;
                assert_int_equal(st_geom_add_xy(&gs[0], -126.0 + 0.05 * cos(t), -47.5 + 0.05 * sin(t)),
                                 ST_OK);
            }
        } else
            cell(&gs[i], i % 100, i / 100);
        ds[i].geom = &gs[i];
    }
    x->audit.districts = ds;
    x->audit.ndistricts = N;
    st_buf b;
    st_buf_init(&b, 0);
    assert_int_equal(st_report_html(&x->in, &b), ST_OK);
    assert_int_equal(count_of(b.data, "<path class=\"district "), N);
    const char *labels = strstr(b.data, "<g class=\"labels\"");
    assert_null(labels);
    assert_int_equal(count_of(b.data, "<tr class=\"ok\">"), ST_REPORT_HTML_MAX_DISTRICTS);
    assert_non_null(strstr(b.data, "The first 5000 of 5010 districts"));
    char *d = path_d(b.data, "D000");
    assert_non_null(d);
    size_t points = count_of(d, "L") + 1;
    assert_true(points >= 8);        /* still a round shape */
    assert_true(points < 1000);      /* but not 20,000 points */
    free(d);
    st_buf_free(&b);
    for (int i = 0; i < N; i++)
        st_geom_clear(&gs[i]);
    free(gs);
    free(ds);
    free_fixture(x);
}

/* Every start tag of a non-void element is closed in order (a small
** well-formedness check; the browser test checks more). */
static void test_html_tags_balance(void **state)
{
    (void)state;
    fixture *x = make_fixture();
    st_buf b;
    st_buf_init(&b, 0);
    assert_int_equal(st_report_html(&x->in, &b), ST_OK);
    static const char *const voids[] = {"meta", "input", "br", "rect", "line", "path", "!DOCTYPE"};
    char stack[256][16];
    int top = 0;
    const char *p = b.data;
    int in_script = 0;
    while ((p = strchr(p, '<')) != NULL) {
        p++;
        if (in_script && strncmp(p, "/script", 7))
            continue;
        int closing = *p == '/';
        if (closing)
            p++;
        char name[16];
        size_t n = 0;
        while (p[n] && !strchr(" >/\n", p[n]) && n < sizeof name - 1)
            n++;
        memcpy(name, p, n);
        name[n] = '\0';
        const char *end = strchr(p, '>');
        assert_non_null(end);
        int self_closed = end[-1] == '/';
        int is_void = 0;
        for (size_t v = 0; v < sizeof voids / sizeof *voids; v++)
            is_void |= !strcmp(name, voids[v]);
        if (closing) {
            assert_true(top > 0);
            if (strcmp(stack[top - 1], name))
                fail_msg("</%s> closes <%s>", name, stack[top - 1]);
            top--;
            in_script = 0;
        } else if (!self_closed && (!is_void || !strcmp(name, "path"))) {
            /* a district path has a <title> child and its own </path> */
            if (!strcmp(name, "path") && strncmp(end + 1, "<title>", 7))
                continue;
            assert_true(top < 256);
            strcpy(stack[top++], name);
            in_script = !strcmp(name, "script");
        }
    }
    assert_int_equal(top, 0);
    st_buf_free(&b);
    free_fixture(x);
}

/* ---- terminal summary -------------------------------------------------------------- */

static void test_text_summary(void **state)
{
    (void)state;
    fixture *x = make_fixture();
    st_buf b;
    st_buf_init(&b, 0);
    assert_int_equal(st_report_text(&x->in, &b), ST_OK);
    const char *t = b.data;
    if (getenv("ST_REPORT_DUMP"))
        fputs(t, stderr);
    assert_non_null(strstr(t, "osm                             120        100          4         15          5"));
    assert_non_null(strstr(t, "all layers                      150        130"));
    assert_non_null(strstr(t, "findings: 5 error, 15 warning, 2 note"));
    assert_non_null(strstr(t, "against the reference: 1 within thresholds\n"));
    assert_non_null(strstr(t, "    under-mapped: 1 (QM02 40%)\n"));
    assert_non_null(strstr(t, "    over-mapped: 1 (QM04 200%)\n"));
    assert_non_null(strstr(t, "gate: FAILED -- share(error) > 0.02\n"));
    assert_non_null(strstr(t, "  QM02                           20         50    0.40  under-mapped\n"));
    assert_non_null(strstr(t, "  material     in QM01           from 40 buildings: URM 60%, RM 40%\n"));
    assert_non_null(strstr(t, "FAILED  share(error) > 0.02 [demo.rules:40]: share(error) = 0.038 > 0.02"));
    assert_non_null(strstr(t, "passed  completeness(occupancy) < 50%"));
    assert_non_null(strstr(t, "warning observed(material) < 60% [demo.rules:42]: measured 0.492, limit 0.6"));
    assert_non_null(strstr(t, "written: out/town.gpkg"));
    assert_non_null(strstr(t, "out/report/report.html"));
    /* occupancy over all: 64 source + 31 default of 130 */
    assert_non_null(strstr(t, "occupancy             73.1% =  49.2% observed +  23.8% assumed"));
    st_buf_free(&b);
    free_fixture(x);
}

/* ---- palettes: CIE L* (D65, sRGB) ------------------------------------------------ */

static double lightness(const char *hex)
{
    unsigned r, g, b;
    assert_int_equal(sscanf(hex, "#%2x%2x%2x", &r, &g, &b), 3);
    double c[3] = {r / 255.0, g / 255.0, b / 255.0};
    for (int i = 0; i < 3; i++)
        c[i] = c[i] <= 0.04045 ? c[i] / 12.92 : pow((c[i] + 0.055) / 1.055, 2.4);
    double y = 0.2126 * c[0] + 0.7152 * c[1] + 0.0722 * c[2];
    double f = y > 216.0 / 24389 ? cbrt(y) : (24389.0 / 27 * y + 16) / 116;
    return 116 * f - 16;
}

static void test_palettes_lightness(void **state)
{
    (void)state;
    /* sequential palettes: strictly darker class by class, by 10 L* or more */
    for (int c = 1; c < ST_REP_CLASSES; c++) {
        assert_true(lightness(st_rep_ratio_colours[c - 1]) - lightness(st_rep_ratio_colours[c]) >= 10);
        assert_true(lightness(st_rep_assumed_colours[c - 1]) - lightness(st_rep_assumed_colours[c]) >= 10);
    }
    /* categorical colours: every pair 10 L* apart */
    for (int i = 0; i < ST_NPROV; i++)
        for (int j = i + 1; j < ST_NPROV; j++)
            assert_true(fabs(lightness(st_rep_prov_colours[i]) - lightness(st_rep_prov_colours[j])) >= 10);
    for (int i = 0; i < 3; i++)
        for (int j = i + 1; j < 3; j++)
            assert_true(fabs(lightness(st_rep_sev_colours[i]) - lightness(st_rep_sev_colours[j])) >= 10);
    /* known value: sRGB white is L* 100, mid grey #777777 about 50.0 */
    assert_true(fabs(lightness("#ffffff") - 100) < 1e-6);
    assert_true(fabs(lightness("#777777") - 50.0) < 0.1);
}

static void test_classes(void **state)
{
    (void)state;
    assert_int_equal(st_rep_class(0.0, st_rep_ratio_breaks), 0);
    assert_int_equal(st_rep_class(0.25, st_rep_ratio_breaks), 1);
    assert_int_equal(st_rep_class(0.89, st_rep_ratio_breaks), 3);
    assert_int_equal(st_rep_class(1.7, st_rep_ratio_breaks), 4);
}

/* ---- projection and simplification ------------------------------------------------- */

static void test_laea_against_cs2cs(void **state)
{
    (void)state;
    /* cs2cs +proj=lonlat +R=1 +to +proj=laea +lat_0=-47.9 +lon_0=-126.2 +R=1 -f %.12f
    ** (PROJ 9.1.1) */
    static const double cases[][4] = {
        {-126.25, -47.93, -0.000584718457, -0.000523788093},
        {-126.2, -47.9, 0, 0},
        {-120, -40, 0.082991947434, 0.134540945787},
        {10, 60, 1.440175601278, 1.301891455331},
    };
    for (size_t i = 0; i < sizeof cases / sizeof *cases; i++) {
        double x, y;
        st_rep_laea(-126.2, -47.9, cases[i][0], cases[i][1], &x, &y);
        assert_true(fabs(x - cases[i][2]) < 1e-11);
        assert_true(fabs(y - cases[i][3]) < 1e-11);
    }
}

static void test_simplify(void **state)
{
    (void)state;
    /* a 100 px square with 9 collinear points on each side, closed */
    double xy[2 * 41];
    size_t n = 0;
    for (int s = 0; s < 4; s++)
        for (int k = 0; k < 10; k++) {
            double t = k * 10.0;
            double px = s == 0 ? t : s == 1 ? 100 : s == 2 ? 100 - t : 0;
            double py = s == 0 ? 0 : s == 1 ? t : s == 2 ? 100 : 100 - t;
            xy[2 * n] = px;
            xy[2 * n + 1] = py + (k == 5 ? 0.1 : 0);   /* a bump below tolerance */
            n++;
        }
    xy[2 * n] = xy[0];
    xy[2 * n + 1] = xy[1];
    n++;
    unsigned char keep[41];
    size_t stack[4 * 41];
    assert_int_equal(st_rep_simplify_ring(xy, n, 0.35, keep, stack), 5);   /* 4 corners + close */
    assert_true(keep[0] && keep[10] && keep[20] && keep[30] && keep[40]);
    /* a ring far below the tolerance keeps four corners */
    double tiny[] = {0, 0, 0.01, 0, 0.01, 0.01, 0, 0.01, 0, 0};
    unsigned char k2[5];
    size_t s2[20];
    assert_int_equal(st_rep_simplify_ring(tiny, 5, 0.35, k2, s2), 5);
}

/* ---- distributions --------------------------------------------------------------------- */

static void test_dist_bins(void **state)
{
    (void)state;
    st_report_dist d;
    memset(&d, 0, sizeof d);
    st_feature *f = st_feature_new();
    assert_non_null(f);
    st_field_value v[1];
    f->schema = v;
    f->nschema = 1;
    static const struct {
        double area;
        const char *storeys;
        st_provenance from;
    } cases[] = {
        {4.99, "3", ST_PROV_SOURCE},  {5.0, "12", ST_PROV_DEFAULT}, {10000, NULL, ST_PROV_UNKNOWN},
        {NAN, "x", ST_PROV_SOURCE},   {19.9, "31", ST_PROV_DERIVED}, {20, "0", ST_PROV_SOURCE},
    };
    for (size_t i = 0; i < sizeof cases / sizeof *cases; i++) {
        f->area_m2 = cases[i].area;
        v[0].text = (char *)cases[i].storeys;
        v[0].from = cases[i].from;
        st_report_dist_add(&d, f, 0);
    }
    f->schema = NULL;
    f->nschema = 0;
    st_feature_free(f);
    assert_int_equal(d.buildings, 6);
    assert_int_equal(d.area[0], 2);   /* 4.99 and NaN */
    assert_int_equal(d.area[1], 1);
    assert_int_equal(d.area[2], 1);
    assert_int_equal(d.area[3], 1);
    assert_int_equal(d.area[ST_REPORT_AREA_BINS - 1], 1);
    assert_int_equal(d.storeys_observed[2], 1);    /* 3 */
    assert_int_equal(d.storeys_assumed[10], 1);    /* 12 in 11-15 */
    assert_int_equal(d.storeys_observed[13], 1);   /* 31+ */
    assert_int_equal(d.storeys_unknown, 3);        /* NULL, "x", "0" */
    int lo, hi;
    st_report_storey_bin(10, &lo, &hi);
    assert_int_equal(lo, 11);
    assert_int_equal(hi, 15);
    st_report_storey_bin(13, &lo, &hi);
    assert_int_equal(hi, -1);
}

/* ---- files ---------------------------------------------------------------------------- */

static char *tmpdir(void)
{
    char tmpl[] = "/tmp/st_report_XXXXXX";
    assert_non_null(mkdtemp(tmpl));
    return strdup(tmpl);
}

static int exists(const char *path)
{
    struct stat sb;
    return stat(path, &sb) == 0;
}

static int count_entries(const char *dir)
{
    char cmd[256];
    snprintf(cmd, sizeof cmd, "ls -A %s | wc -l", dir);
    FILE *p = popen(cmd, "r");
    int n = -1;
    assert_int_equal(fscanf(p, "%d", &n), 1);
    pclose(p);
    return n;
}

static void test_prepare_commit(void **state)
{
    (void)state;
    fixture *x = make_fixture();
    char *base = tmpdir();
    char dir[300], json[320], html[320];
    snprintf(dir, sizeof dir, "%s/rep", base);
    snprintf(json, sizeof json, "%s/report.json", dir);
    snprintf(html, sizeof html, "%s/report.html", dir);
    st_diags d;
    st_diags_init(&d);
    /* prepared but not committed: nothing in place; freeing removes the folder */
    st_report_pending *p = NULL;
    assert_int_equal(st_report_prepare(&x->in, dir, &d, &p), ST_OK);
    assert_int_equal(count_entries(dir), 2);   /* the two temporary files */
    assert_false(exists(json));
    assert_false(exists(html));
    st_report_pending_free(p);
    assert_false(exists(dir));
    /* prepared and committed */
    assert_int_equal(st_report_prepare(&x->in, dir, &d, &p), ST_OK);
    assert_int_equal(st_report_commit(p, &d), ST_OK);
    assert_string_equal(st_report_pending_path(p, 1), html);
    st_report_pending_free(p);
    assert_true(exists(json));
    assert_true(exists(html));
    assert_int_equal(count_entries(dir), 2);
    /* --report naming a file */
    st_report_pending *q = NULL;
    assert_int_equal(st_report_prepare(&x->in, json, &d, &q), ST_ERR_IO);
    assert_null(q);
    assert_int_equal(d.errors, 1);
    /* a single file through write_json */
    char one[320];
    snprintf(one, sizeof one, "%s/one.json", base);
    assert_int_equal(st_report_write_json(&x->in, one, &d), ST_OK);
    assert_true(exists(one));
    st_diags_free(&d);
    char cmd[340];
    snprintf(cmd, sizeof cmd, "rm -rf %s", base);
    assert_int_equal(system(cmd), 0);
    free(base);
    free_fixture(x);
}

static void test_siblings(void **state)
{
    (void)state;
    char *base = tmpdir();
    char shp[300], path[320];
    snprintf(shp, sizeof shp, "%s/a.shp", base);
    static const char *const make[] = {"a.shp", "a.dbf", "a.shx", "b.prj"};
    for (int i = 0; i < 4; i++) {
        snprintf(path, sizeof path, "%s/%s", base, make[i]);
        FILE *fp = fopen(path, "w");
        assert_non_null(fp);
        fclose(fp);
    }
    char **paths = NULL;
    size_t n = 0;
    assert_int_equal(st_report_file_siblings(shp, &paths, &n), ST_OK);
    assert_int_equal(n, 3);   /* a.shp, a.shx, a.dbf; b.prj belongs to another layer */
    assert_string_equal(paths[0], shp);
    assert_non_null(strstr(paths[1], "a.shx"));
    assert_non_null(strstr(paths[2], "a.dbf"));
    for (size_t i = 0; i < n; i++)
        st_free(paths[i]);
    st_free(paths);
    assert_int_equal(st_report_file_siblings("x.geojson", &paths, &n), ST_OK);
    assert_int_equal(n, 1);
    st_free(paths[0]);
    st_free(paths);
    /* a layer spec names its file */
    snprintf(path, sizeof path, "%s/a.shp:a", base);
    assert_int_equal(st_report_file_siblings(path, &paths, &n), ST_OK);
    assert_int_equal(n, 3);
    assert_string_equal(paths[0], shp);
    for (size_t i = 0; i < n; i++)
        st_free(paths[i]);
    st_free(paths);
    char cmd[340];
    snprintf(cmd, sizeof cmd, "rm -rf %s", base);
    assert_int_equal(system(cmd), 0);
    free(base);
}

/* ---- allocation failure: every failure is ST_ERR_NOMEM, nothing leaks ---------- */

static void test_alloc_failures(void **state)
{
    (void)state;
    fixture *x = make_fixture();
    st_status (*const fns[3])(const st_report_input *, st_buf *) = {st_report_json,
                                                                    st_report_html,
                                                                    st_report_text};
    for (int f = 0; f < 3; f++) {
        for (long n = 1;; n++) {
            st_buf b;
            st_buf_init(&b, 0);
            st_alloc_fail_after(n);
            st_status rc = fns[f](&x->in, &b);
            long used = st_alloc_count();
            st_alloc_fail_after(0);
            st_buf_free(&b);
            if (rc == ST_OK) {
                assert_true(used < n);
                break;
            }
            assert_int_equal(rc, ST_ERR_NOMEM);
        }
    }
    free_fixture(x);
}

static void test_size_limit(void **state)
{
    (void)state;
    fixture *x = make_fixture();
    st_buf b;
    st_buf_init(&b, 4096);
    assert_int_equal(st_report_html(&x->in, &b), ST_ERR_LIMIT);
    st_buf_free(&b);
    free_fixture(x);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_json_figures),
        cmocka_unit_test(test_json_without_audit),
        cmocka_unit_test(test_json_invalid_utf8_replaced),
        cmocka_unit_test(test_html_map_and_escaping),
        cmocka_unit_test(test_html_without_audit),
        cmocka_unit_test(test_html_multipolygon_and_absent),
        cmocka_unit_test(test_html_many_districts),
        cmocka_unit_test(test_html_tags_balance),
        cmocka_unit_test(test_text_summary),
        cmocka_unit_test(test_palettes_lightness),
        cmocka_unit_test(test_classes),
        cmocka_unit_test(test_laea_against_cs2cs),
        cmocka_unit_test(test_simplify),
        cmocka_unit_test(test_dist_bins),
        cmocka_unit_test(test_prepare_commit),
        cmocka_unit_test(test_siblings),
        cmocka_unit_test(test_alloc_failures),
        cmocka_unit_test(test_size_limit),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
