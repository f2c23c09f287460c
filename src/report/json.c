/*
** report/json.c -- report.json through YAJL's generator: one object whose
** members follow docs/report.md (schema version ST_REPORT_SCHEMA_VERSION,
** checked by docs/report.schema.json).
**
** Input:  st_report_input (borrowed).
** Output: indented JSON appended to an st_buf; YAJL's output goes straight
**         to the buffer through its print callback.
** Errors: ST_ERR_NOMEM, ST_ERR_LIMIT from the buffer; a YAJL generator
**         error (cannot happen with this fixed nesting) is ST_ERR_FORMAT.
** Numbers: counts as integers; areas in m2 with 2 decimals, shares and
**         ratios with 6; NaN (no reference, no values) is null.
** Strings: invalid UTF-8 (cannot come from the readers, which sanitise)
**         is replaced by U+FFFD before it reaches YAJL.
*/
#include <math.h>
#include <stdio.h>
#include <string.h>

#include <yajl/yajl_gen.h>

#include "reportInt.h"

typedef struct jw {
    yajl_gen g;
    st_buf *b;
    st_status rc;
} jw;

static void on_print(void *ctx, const char *s, size_t n)
{
    jw *j = ctx;
    if (j->rc == ST_OK)
        j->rc = st_buf_append(j->b, s, n);
}

static void check(jw *j, yajl_gen_status s)
{
    if (s != yajl_gen_status_ok && j->rc == ST_OK)
        j->rc = ST_ERR_FORMAT;
}

static void str(jw *j, const char *s)
{
    if (j->rc != ST_OK)
        return;
    if (!s) {
        check(j, yajl_gen_null(j->g));
        return;
    }
    size_t n = strlen(s);
    if (st_utf8_valid_prefix(s, n) == n) {
        check(j, yajl_gen_string(j->g, (const unsigned char *)s, n));
        return;
    }
    char *clean = st_utf8_sanitize(s, n);
    if (!clean) {
        j->rc = ST_ERR_NOMEM;
        return;
    }
    check(j, yajl_gen_string(j->g, (const unsigned char *)clean, strlen(clean)));
    st_free(clean);
}

static void key(jw *j, const char *k)
{
    str(j, k);
}

static void u64(jw *j, uint64_t v)
{
    if (j->rc == ST_OK)
        check(j, yajl_gen_integer(j->g, (long long)v));
}

static void i64_or_null(jw *j, int64_t v)
{
    if (j->rc != ST_OK)
        return;
    check(j, v < 0 ? yajl_gen_null(j->g) : yajl_gen_integer(j->g, (long long)v));
}

static void boolean(jw *j, int v)
{
    if (j->rc == ST_OK)
        check(j, yajl_gen_bool(j->g, v != 0));
}

/* A decimal with at most 'dec' places, trailing zeros dropped; null for
** NaN and infinities, which JSON cannot carry. */
static void num(jw *j, double v, int dec)
{
    if (j->rc != ST_OK)
        return;
    if (!isfinite(v)) {
        check(j, yajl_gen_null(j->g));
        return;
    }
    char t[64];
    int n = snprintf(t, sizeof t, "%.*f", dec, v);
    if (n <= 0 || (size_t)n >= sizeof t) {
        j->rc = ST_ERR_FORMAT;
        return;
    }
    if (strchr(t, '.')) {
        while (t[n - 1] == '0')
            t[--n] = '\0';
        if (t[n - 1] == '.')
            t[--n] = '\0';
    }
    if (!strcmp(t, "-0"))
        strcpy(t, "0");
    check(j, yajl_gen_number(j->g, t, strlen(t)));
}

static void obj(jw *j)
{
    if (j->rc == ST_OK)
        check(j, yajl_gen_map_open(j->g));
}
static void obj_end(jw *j)
{
    if (j->rc == ST_OK)
        check(j, yajl_gen_map_close(j->g));
}
static void arr(jw *j)
{
    if (j->rc == ST_OK)
        check(j, yajl_gen_array_open(j->g));
}
static void arr_end(jw *j)
{
    if (j->rc == ST_OK)
        check(j, yajl_gen_array_close(j->g));
}

/* ---- sections --------------------------------------------------------------- */

static void run_section(jw *j, const st_report_input *in)
{
    key(j, "run");
    obj(j);
    key(j, "tool"), str(j, "stocktake");
    key(j, "version"), str(j, ST_VERSION);
    key(j, "command_line"), str(j, in->command_line);
    key(j, "started"), str(j, in->started);
    key(j, "finished"), str(j, in->finished);
    key(j, "seed");
    if (in->has_seed)
        u64(j, in->seed);
    else
        str(j, NULL);
    key(j, "files");
    arr(j);
    for (size_t i = 0; i < in->nfiles; i++) {
        obj(j);
        key(j, "role"), str(j, in->files[i].role);
        key(j, "path"), str(j, in->files[i].path);
        key(j, "bytes"), u64(j, in->files[i].bytes);
        key(j, "sha256"), str(j, in->files[i].sha256);
        obj_end(j);
    }
    arr_end(j);
    key(j, "outputs");
    arr(j);
    for (size_t i = 0; i < in->noutputs; i++)
        str(j, in->outputs[i]);
    arr_end(j);
    obj_end(j);
}

static void layer_counts(jw *j, const st_run_layer *L)
{
    uint64_t aside = L->duplicate + L->rejected;
    key(j, "read"), u64(j, L->read);
    key(j, "buildings"), u64(j, L->kept);
    key(j, "repaired"), u64(j, L->repaired);
    key(j, "set_aside"), u64(j, aside);
    key(j, "duplicate"), u64(j, L->duplicate);
    key(j, "rejected"), u64(j, L->rejected);
    key(j, "balanced"), boolean(j, L->read == L->kept + aside);
}

static void balance_section(jw *j, const st_run_result *r)
{
    key(j, "balance");
    obj(j);
    key(j, "layers");
    arr(j);
    for (size_t l = 0; l < r->nlayers; l++) {
        const st_run_layer *L = &r->layers[l];
        obj(j);
        key(j, "name"), str(j, L->name);
        key(j, "path"), str(j, L->path);
        key(j, "format"), str(j, L->format);
        key(j, "crs"), str(j, L->crs);
        layer_counts(j, L);
        obj_end(j);
    }
    arr_end(j);
    st_run_layer t;
    st_rep_balance_total(r, &t);
    key(j, "total");
    obj(j);
    layer_counts(j, &t);
    obj_end(j);
    obj_end(j);
}

static void severities(jw *j, const uint64_t n[3])
{
    obj(j);
    key(j, "error"), u64(j, n[ST_SEV_ERROR]);
    key(j, "warning"), u64(j, n[ST_SEV_WARNING]);
    key(j, "note"), u64(j, n[ST_SEV_NOTE]);
    obj_end(j);
}

static void findings_section(jw *j, const st_run_result *r)
{
    key(j, "findings");
    obj(j);
    key(j, "total"), u64(j, r->findings[0] + r->findings[1] + r->findings[2]);
    key(j, "by_severity"), severities(j, r->findings);
    key(j, "by_code");
    arr(j);
    for (size_t c = 0; c < r->ncodes; c++) {
        obj(j);
        key(j, "code"), str(j, r->codes[c].code);
        key(j, "severity"), str(j, st_severity_name(r->codes[c].severity));
        key(j, "count"), u64(j, r->codes[c].count);
        obj_end(j);
    }
    arr_end(j);
    obj_end(j);
}

/* {"source": n, "derived": n, "default": n, "drawn": n, "unknown": n} */
static void provenance(jw *j, const st_audit_field *f)
{
    static const st_provenance order[ST_NPROV] = {ST_PROV_SOURCE, ST_PROV_DERIVED,
                                                  ST_PROV_DEFAULT, ST_PROV_DRAWN,
                                                  ST_PROV_UNKNOWN};
    obj(j);
    for (int k = 0; k < ST_NPROV; k++) {
        key(j, st_provenance_name(order[k]));
        u64(j, f->by_prov[order[k]]);
    }
    obj_end(j);
}

static double share(uint64_t part, uint64_t whole)
{
    return whole ? (double)part / (double)whole : NAN;
}

static void fields_section(jw *j, const st_audit *a)
{
    key(j, "fields");
    arr(j);
    for (uint32_t i = 0; a && a->total.fields && i < a->nfields; i++) {
        const st_audit_field *f = &a->total.fields[i];
        uint64_t t = st_rep_field_total(f);
        obj(j);
        key(j, "name"), str(j, a->fields[i]);
        key(j, "by_provenance"), provenance(j, f);
        key(j, "known_share"), num(j, share(t - f->by_prov[ST_PROV_UNKNOWN], t), 6);
        key(j, "observed_share");
        num(j, share(f->by_prov[ST_PROV_SOURCE] + f->by_prov[ST_PROV_DERIVED], t), 6);
        key(j, "assumed_share");
        num(j, share(f->by_prov[ST_PROV_DEFAULT] + f->by_prov[ST_PROV_DRAWN], t), 6);
        obj_end(j);
    }
    arr_end(j);
}

static void district_object(jw *j, const st_audit *a, const st_audit_district *d)
{
    obj(j);
    key(j, "key"), str(j, d->key);
    key(j, "region"), str(j, d->region);
    key(j, "mapped"), boolean(j, d->geom && !st_geom_is_empty(d->geom));
    key(j, "buildings"), u64(j, d->buildings);
    key(j, "repaired"), u64(j, d->repaired);
    key(j, "duplicate"), u64(j, d->duplicate);
    key(j, "rejected"), u64(j, d->rejected);
    key(j, "footprint_m2"), num(j, d->footprint_m2, 2);
    key(j, "floor_m2"), num(j, d->floor_m2, 2);
    key(j, "floor_known"), u64(j, d->floor_known);
    key(j, "findings"), severities(j, d->findings);
    key(j, "fields");
    obj(j);
    for (uint32_t i = 0; d->fields && i < a->nfields; i++) {
        key(j, a->fields[i]);
        provenance(j, &d->fields[i]);
    }
    obj_end(j);
    key(j, "observed_share"), num(j, st_rep_prov_share(a, d, ST_PROV_DERIVED, ST_PROV_SOURCE), 6);
    key(j, "assumed_share"), num(j, st_rep_assumed_share(a, d), 6);
    key(j, "reference");
    obj(j);
    key(j, "expected"), i64_or_null(j, d->expected);
    key(j, "ratio"), num(j, d->ratio, 6);
    key(j, "state"), str(j, st_rep_ref_name(d->ref));
    obj_end(j);
    obj_end(j);
}

static void districts_section(jw *j, const st_audit *a)
{
    key(j, "districts");
    arr(j);
    for (size_t i = 0; a && i < a->ndistricts; i++)
        district_object(j, a, &a->districts[i]);
    arr_end(j);
    key(j, "districts_total");
    if (a)
        district_object(j, a, &a->total);
    else
        str(j, NULL);
}

static void reference_section(jw *j, const st_audit *a)
{
    uint64_t states[5] = {0};
    int given = 0;
    for (size_t i = 0; a && i < a->ndistricts; i++) {
        states[a->districts[i].ref]++;
        given |= a->districts[i].expected >= 0;
    }
    given |= a && a->nref_unknown > 0;
    key(j, "reference");
    obj(j);
    key(j, "given"), boolean(j, given);
    key(j, "under_ratio"), num(j, a ? a->under_ratio : NAN, 6);
    key(j, "over_ratio"), num(j, a ? a->over_ratio : NAN, 6);
    key(j, "districts");
    obj(j);
    for (int s = ST_REF_NONE; s <= ST_REF_ABSENT; s++) {
        key(j, st_rep_ref_name((st_ref_state)s));
        u64(j, states[s]);
    }
    obj_end(j);
    key(j, "absent");
    arr(j);
    for (size_t i = 0; a && i < a->nref_unknown; i++)
        str(j, a->ref_unknown[i]);
    arr_end(j);
    obj_end(j);
}

static void learned_section(jw *j, const st_audit *a)
{
    key(j, "learned_defaults");
    arr(j);
    for (size_t i = 0; a && i < a->nlearned; i++) {
        const st_audit_learned *l = &a->learned[i];
        obj(j);
        key(j, "district"), str(j, l->district);
        key(j, "field"), str(j, l->field);
        key(j, "from_buildings"), u64(j, l->from_buildings);
        key(j, "distribution"), str(j, l->distribution);
        obj_end(j);
    }
    arr_end(j);
}

static void unmapped_section(jw *j, const st_report_input *in)
{
    key(j, "unmapped");
    arr(j);
    for (size_t i = 0; i < st_rep_unmapped_count(in); i++) {
        const char *field, *value;
        uint64_t count;
        st_rep_unmapped_at(in, i, &field, &value, &count);
        obj(j);
        key(j, "field"), str(j, field);
        key(j, "value"), str(j, value);
        key(j, "count"), u64(j, count);
        obj_end(j);
    }
    arr_end(j);
}

static void distributions_section(jw *j, const st_report_dist *d)
{
    key(j, "distributions");
    if (!d) {
        str(j, NULL);
        return;
    }
    obj(j);
    key(j, "buildings"), u64(j, d->buildings);
    key(j, "footprint_area_m2");
    arr(j);
    for (int i = 0; i < ST_REPORT_AREA_BINS; i++) {
        double lo, hi;
        st_report_area_bin(i, &lo, &hi);
        obj(j);
        key(j, "from"), num(j, lo, 2);
        key(j, "to"), num(j, hi, 2);
        key(j, "count"), u64(j, d->area[i]);
        obj_end(j);
    }
    arr_end(j);
    key(j, "storeys");
    if (!d->has_storeys)
        str(j, NULL);
    else {
        obj(j);
        key(j, "bins");
        arr(j);
        for (int i = 0; i < ST_REPORT_STOREY_BINS; i++) {
            int lo, hi;
            st_report_storey_bin(i, &lo, &hi);
            obj(j);
            key(j, "from"), u64(j, (uint64_t)lo);
            key(j, "to"), i64_or_null(j, hi);
            key(j, "observed"), u64(j, d->storeys_observed[i]);
            key(j, "assumed"), u64(j, d->storeys_assumed[i]);
            obj_end(j);
        }
        arr_end(j);
        key(j, "unknown"), u64(j, d->storeys_unknown);
        obj_end(j);
    }
    obj_end(j);
}

static void gate_section(jw *j, const st_report_input *in)
{
    st_audit_gate fallback;
    const st_audit_gate *g = NULL;
    size_t n = st_rep_gates(in, &fallback, &g);
    key(j, "gate");
    obj(j);
    key(j, "failed"), boolean(j, st_rep_gate_failed(in));
    key(j, "reason"), str(j, in->run->gate_reason);
    key(j, "results");
    arr(j);
    for (size_t i = 0; i < n; i++) {
        obj(j);
        key(j, "statement"), str(j, g[i].statement);
        key(j, "rule"), str(j, g[i].rule);
        key(j, "value"), num(j, g[i].value, 6);
        key(j, "limit"), num(j, g[i].limit, 6);
        key(j, "passed"), boolean(j, g[i].passed);
        key(j, "fails"), boolean(j, g[i].fails);
        key(j, "detail"), str(j, g[i].detail);
        obj_end(j);
    }
    arr_end(j);
    obj_end(j);
}

/* ---- entry --------------------------------------------------------------------- */

st_status st_report_json(const st_report_input *in, st_buf *out)
{
    /* YAJL's own allocator: yajl_gen_alloc does not survive a failing
    ** allocation hook (it uses its buffer before checking it), and the
    ** generator's few small blocks are not worth the risk. */
    jw j = {yajl_gen_alloc(NULL), out, ST_OK};
    if (!j.g)
        return ST_ERR_NOMEM;
    yajl_gen_config(j.g, yajl_gen_beautify, 1);
    yajl_gen_config(j.g, yajl_gen_indent_string, "  ");
    yajl_gen_config(j.g, yajl_gen_print_callback, on_print, &j);
    obj(&j);
    key(&j, "report"), str(&j, "stocktake quality report");
    key(&j, "schema_version"), u64(&j, ST_REPORT_SCHEMA_VERSION);
    run_section(&j, in);
    balance_section(&j, in->run);
    findings_section(&j, in->run);
    fields_section(&j, in->audit);
    districts_section(&j, in->audit);
    reference_section(&j, in->audit);
    learned_section(&j, in->audit);
    unmapped_section(&j, in);
    distributions_section(&j, in->dist);
    gate_section(&j, in);
    obj_end(&j);
    if (j.rc == ST_OK)
        j.rc = st_buf_puts(out, "\n");
    yajl_gen_free(j.g);
    return j.rc;
}
