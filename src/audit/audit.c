/*
** audit/audit.c -- the completeness audit: per district and for the whole
** run, counts, areas, floor area, provenance of every schema field,
** findings by severity and code, completeness against reference counts,
** learned defaults, unmapped values, and the quality gate.
**
** Input:   st_audit_input (audit.h): every feature with its district, the
**          findings, the district layer, the rules, the reference counts.
** Output:  an st_audit (plain data, owned by the caller).
** Errors:  ST_ERR_NOMEM only.
** Limits:  memory grows with districts x schema fields and with distinct
**          finding codes, not with buildings (beyond one index by bid).
*/
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "stocktake/audit.h"

const char *st_ref_state_name(st_ref_state s)
{
    switch (s) {
    case ST_REF_NONE: return "none";
    case ST_REF_OK: return "ok";
    case ST_REF_UNDER: return "under";
    case ST_REF_OVER: return "over";
    case ST_REF_ABSENT: return "absent";
    }
    return "none";
}

/* ---- freeing --------------------------------------------------------------- */

static void free_district(st_audit_district *d)
{
    st_free(d->key);
    st_free(d->region);
    st_free(d->fields);
    st_free(d->codes);
    st_free(d->geom_repair);
}

void st_audit_free(st_audit *a)
{
    if (!a)
        return;
    for (uint32_t i = 0; a->fields && i < a->nfields; i++)
        st_free(a->fields[i]);
    st_free(a->fields);
    for (size_t i = 0; a->districts && i < a->ndistricts; i++)
        free_district(&a->districts[i]);
    st_free(a->districts);
    free_district(&a->total);
    st_free(a->codes);
    for (size_t i = 0; i < a->nunmapped; i++) {
        st_free(a->unmapped[i].field);
        st_free(a->unmapped[i].value);
    }
    st_free(a->unmapped);
    for (size_t i = 0; i < a->nlearned; i++) {
        st_free(a->learned[i].district);
        st_free(a->learned[i].rule);
        st_free(a->learned[i].field);
        st_free(a->learned[i].distribution);
    }
    st_free(a->learned);
    for (size_t i = 0; i < a->ngates; i++) {
        st_free(a->gates[i].statement);
        st_free(a->gates[i].rule);
        st_free(a->gates[i].detail);
    }
    st_free(a->gates);
    for (size_t i = 0; i < a->nref_unknown; i++)
        st_free(a->ref_unknown[i]);
    st_free(a->ref_unknown);
    st_free(a);
}

/* ---- building the district list ---------------------------------------------- */

static st_status init_district(st_audit *a, st_audit_district *d, const char *key,
                               const char *region)
{
    memset(d, 0, sizeof *d);
    d->expected = -1;
    d->ratio = NAN;
    d->key = st_strdup(key);
    d->region = region ? st_strdup(region) : NULL;
    d->fields = st_calloc(a->nfields ? a->nfields : 1, sizeof *d->fields);
    return d->key && (!region || d->region) && d->fields ? ST_OK : ST_ERR_NOMEM;
}

static st_status schema_fields(st_audit *a, const st_rules *rules)
{
    a->storeys_field = -1;
    a->nfields = rules ? st_rules_field_count(rules) : 0;
    a->fields = st_calloc(a->nfields ? a->nfields : 1, sizeof *a->fields);
    if (!a->fields)
        return ST_ERR_NOMEM;
    for (uint32_t i = 0; i < a->nfields; i++) {
        const st_schema_field *f = st_rules_field(rules, i);
        if (!(a->fields[i] = st_strdup(f->name)))
            return ST_ERR_NOMEM;
        if (!strcmp(f->name, "storeys") && (f->kind == ST_KIND_INTEGER || f->kind == ST_KIND_REAL))
            a->storeys_field = (int32_t)i;
    }
    return ST_OK;
}

/* Reference keys the layer lacks: count them, list them. */
static st_status absent_keys(st_audit *a, const st_audit_input *in, size_t *nabsent)
{
    *nabsent = 0;
    if (!in->reference)
        return ST_OK;
    size_t n = st_reference_count(in->reference);
    a->ref_unknown = st_calloc(n ? n : 1, sizeof *a->ref_unknown);
    if (!a->ref_unknown)
        return ST_ERR_NOMEM;
    for (size_t i = 0; i < n; i++) {
        const char *key = st_reference_key(in->reference, i, NULL);
        if (in->districts && st_districts_find(in->districts, key) >= 0)
            continue;
        if (!(a->ref_unknown[a->nref_unknown++] = st_strdup(key)))
            return ST_ERR_NOMEM;
    }
    *nabsent = a->nref_unknown;
    return ST_OK;
}

static st_status make_districts(st_audit *a, const st_audit_input *in)
{
    size_t nl = in->districts ? st_districts_count(in->districts) : 0, nabsent = 0;
    st_status rc = absent_keys(a, in, &nabsent);
    if (rc != ST_OK)
        return rc;
    a->nlayer_districts = nl;
    a->ndistricts = nl + nabsent + 1;
    a->districts = st_calloc(a->ndistricts, sizeof *a->districts);
    if (!a->districts)
        return ST_ERR_NOMEM;
    size_t made = 0;
    for (size_t i = 0; rc == ST_OK && i < nl; i++, made++) {
        const st_district *d = st_districts_get(in->districts, i);
        st_audit_district *ad = &a->districts[i];
        rc = init_district(a, ad, d->key, d->region);
        ad->geom = &d->geom;
        if (rc == ST_OK && d->repair && !(ad->geom_repair = st_strdup(d->repair)))
            rc = ST_ERR_NOMEM;
    }
    for (size_t i = 0; rc == ST_OK && i < nabsent; i++, made++) {
        rc = init_district(a, &a->districts[nl + i], a->ref_unknown[i], NULL);
        a->districts[nl + i].ref = ST_REF_ABSENT;
    }
    if (rc == ST_OK) {
        rc = init_district(a, &a->districts[a->ndistricts - 1], ST_PLACE_NONE, NULL);
        made++;
    }
    if (rc == ST_OK)
        rc = init_district(a, &a->total, "all", NULL);
    a->ndistricts = made;   /* only initialised entries are freed */
    return rc;
}

/* ---- counting features ------------------------------------------------------- */

static int is_kept(const st_feature *f)
{
    return f->status == ST_STATUS_OK || f->status == ST_STATUS_REPAIRED;
}

static st_audit_district *district_of(st_audit *a, const st_feature *f)
{
    if (f->district >= 0 && (size_t)f->district < a->nlayer_districts)
        return &a->districts[f->district];
    return &a->districts[a->ndistricts - 1];
}

static void count_into(st_audit *a, st_audit_district *d, const st_feature *f)
{
    switch (f->status) {
    case ST_STATUS_DUPLICATE: d->duplicate++; return;
    case ST_STATUS_REJECTED: d->rejected++; return;
    case ST_STATUS_REPAIRED: d->repaired++; break;
    case ST_STATUS_OK: break;
    }
    d->buildings++;
    if (isfinite(f->area_m2))
        d->footprint_m2 += f->area_m2;
    for (uint32_t i = 0; i < a->nfields && i < f->nschema; i++)
        d->fields[i].by_prov[f->schema[i].from < ST_NPROV ? f->schema[i].from : 0]++;
    if (a->storeys_field >= 0 && (uint32_t)a->storeys_field < f->nschema) {
        const st_field_value *v = &f->schema[a->storeys_field];
        char *end;
        double s = v->text && v->from != ST_PROV_UNKNOWN ? strtod(v->text, &end) : NAN;
        if (v->text && v->from != ST_PROV_UNKNOWN && end != v->text && isfinite(s) && s > 0 &&
            isfinite(f->area_m2)) {
            d->floor_m2 += f->area_m2 * s;
            d->floor_known++;
        }
    }
}

static void count_features(st_audit *a, const st_audit_input *in)
{
    for (size_t i = 0; i < in->nfeatures; i++) {
        const st_feature *f = in->features[i];
        count_into(a, district_of(a, f), f);
        count_into(a, &a->total, f);
    }
}

/* ---- findings ------------------------------------------------------------------ */

typedef struct bidx {
    uint64_t bid;
    uint32_t i;
} bidx;

static int by_bid(const void *x, const void *y)
{
    const bidx *a = x, *b = y;
    return a->bid < b->bid ? -1 : a->bid > b->bid;
}

/* Features sorted by bid, to find the building a finding is about. */
static bidx *index_bids(const st_audit_input *in)
{
    bidx *ix = st_malloc((in->nfeatures ? in->nfeatures : 1) * sizeof *ix);
    if (!ix)
        return NULL;
    int sorted = 1;
    for (size_t i = 0; i < in->nfeatures; i++) {
        ix[i] = (bidx){in->features[i]->bid, (uint32_t)i};
        sorted &= i == 0 || ix[i].bid > ix[i - 1].bid;
    }
    if (!sorted)
        qsort(ix, in->nfeatures, sizeof *ix, by_bid);
    return ix;
}

/* Position in the run's features of the building 'bid', or -1. */
static long long feature_of(const st_audit_input *in, const bidx *ix, uint64_t bid)
{
    size_t lo = 0, hi = in->nfeatures;
    while (lo < hi) {
        size_t mid = lo + (hi - lo) / 2;
        if (ix[mid].bid < bid)
            lo = mid + 1;
        else
            hi = mid;
    }
    return lo < in->nfeatures && ix[lo].bid == bid ? (long long)ix[lo].i : -1;
}

static st_status add_code(st_audit_code **codes, size_t *n, const st_finding *g)
{
    size_t c = 0;
    while (c < *n && strcmp((*codes)[c].code, g->code) != 0)
        c++;
    if (c == *n) {
        st_audit_code *a = st_realloc(*codes, (c + 1) * sizeof *a);
        if (!a)
            return ST_ERR_NOMEM;
        *codes = a;
        a[c] = (st_audit_code){g->code, g->severity, 0};
        (*n)++;
    }
    (*codes)[c].count++;
    if (g->severity > (*codes)[c].severity)
        (*codes)[c].severity = g->severity;
    return ST_OK;
}

static int by_count(const void *x, const void *y)
{
    const st_audit_code *a = x, *b = y;
    if (a->count != b->count)
        return a->count > b->count ? -1 : 1;
    return strcmp(a->code, b->code);
}

static void sort_codes(st_audit_code *c, size_t n)
{
    if (n > 1)              /* qsort wants a non-NULL array, even empty */
        qsort(c, n, sizeof *c, by_count);
}

/* Per district and in total; worst[] gets each kept building's worst
** severity (+1; 0 = none) for the share() gates. */
static st_status count_findings(st_audit *a, const st_audit_input *in, uint8_t *worst)
{
    if (!in->findings)
        return ST_OK;
    bidx *ix = index_bids(in);
    if (!ix)
        return ST_ERR_NOMEM;
    st_status rc = ST_OK;
    for (size_t k = 0; rc == ST_OK && k < in->findings->count; k++) {
        const st_finding *g = &in->findings->items[k];
        long long i = feature_of(in, ix, g->bid);
        const st_feature *f = i >= 0 ? in->features[i] : NULL;
        st_audit_district *d = f ? district_of(a, f) : &a->districts[a->ndistricts - 1];
        d->findings[g->severity]++;
        a->total.findings[g->severity]++;
        rc = add_code(&d->codes, &d->ncodes, g);
        if (rc == ST_OK)
            rc = add_code(&a->total.codes, &a->total.ncodes, g);
        if (rc == ST_OK)
            rc = add_code(&a->codes, &a->ncodes, g);
        if (f && is_kept(f) && worst[i] < g->severity + 1)
            worst[i] = (uint8_t)(g->severity + 1);
    }
    st_free(ix);
    for (size_t i = 0; i < a->ndistricts; i++)
        sort_codes(a->districts[i].codes, a->districts[i].ncodes);
    sort_codes(a->total.codes, a->total.ncodes);
    sort_codes(a->codes, a->ncodes);
    return rc;
}

/* ---- reference counts ------------------------------------------------------------ */

static void gate_thresholds(st_audit *a, const st_rules *rules)
{
    a->under_ratio = ST_AUDIT_UNDER_RATIO;
    a->over_ratio = ST_AUDIT_OVER_RATIO;
    int under = 0, over = 0;
    for (size_t i = 0; rules && i < st_rules_gate_count(rules); i++) {
        const st_gate_rule *g = st_rules_gate(rules, i);
        if (g->metric != ST_METRIC_DISTRICT_COMPLETENESS)
            continue;
        if (!under && (g->cmp == ST_CMP_LT || g->cmp == ST_CMP_LE)) {
            a->under_ratio = g->threshold;
            under = 1;
        } else if (!over && (g->cmp == ST_CMP_GT || g->cmp == ST_CMP_GE)) {
            a->over_ratio = g->threshold;
            over = 1;
        }
    }
}

static void judge(st_audit *a, st_audit_district *d, uint64_t expected)
{
    d->expected = (int64_t)expected;
    if (expected == 0) {
        d->ratio = NAN;
        d->ref = d->buildings ? ST_REF_OVER : ST_REF_OK;
        return;
    }
    d->ratio = (double)d->buildings / (double)expected;
    if (d->ref == ST_REF_ABSENT)
        return;
    d->ref = d->ratio < a->under_ratio ? ST_REF_UNDER
           : d->ratio > a->over_ratio ? ST_REF_OVER : ST_REF_OK;
}

static void compare_reference(st_audit *a, const st_audit_input *in)
{
    if (!in->reference)
        return;
    a->has_reference = 1;
    uint64_t sum = 0;
    for (size_t i = 0; i < st_reference_count(in->reference); i++) {
        uint64_t n;
        const char *key = st_reference_key(in->reference, i, &n);
        sum += n;
        int32_t di = in->districts ? st_districts_find(in->districts, key) : -1;
        if (di >= 0) {
            judge(a, &a->districts[di], n);
            continue;
        }
        for (size_t k = a->nlayer_districts; k + 1 < a->ndistricts; k++)
            if (!strcmp(a->districts[k].key, key))
                judge(a, &a->districts[k], n);
    }
    a->total.expected = (int64_t)sum;
    a->total.ratio = sum ? (double)a->total.buildings / (double)sum : NAN;
}

/* ---- learned defaults, unmapped values ---------------------------------------------- */

static st_status copy_learned(st_audit *a, const st_audit_input *in)
{
    size_t n = in->defaults ? st_defaults_learned_count(in->defaults) : 0;
    a->learned = st_calloc(n ? n : 1, sizeof *a->learned);
    if (!a->learned)
        return ST_ERR_NOMEM;
    for (size_t i = 0; i < n; i++) {
        const st_defaults_learned *l = st_defaults_learned_get(in->defaults, i);
        st_audit_learned *o = &a->learned[a->nlearned++];
        o->district = st_strdup(l->where);
        o->per_region = l->per_region;
        o->rule = st_strdup(l->rule);
        o->field = st_strdup(l->field < a->nfields ? a->fields[l->field] : "");
        o->from_buildings = l->from_buildings;
        o->distribution = st_strdup(l->distribution);
        if (!o->district || !o->rule || !o->field || !o->distribution)
            return ST_ERR_NOMEM;
    }
    return ST_OK;
}

static st_status copy_unmapped(st_audit *a, const st_audit_input *in)
{
    if (!in->unmapped)
        return ST_OK;
    st_unmapped_item *items = NULL;
    size_t n = 0;
    st_status rc = st_unmapped_sorted(in->unmapped, &items, &n);
    if (rc == ST_OK && n && !(a->unmapped = st_calloc(n, sizeof *a->unmapped)))
        rc = ST_ERR_NOMEM;
    for (size_t i = 0; rc == ST_OK && i < n; i++) {
        st_audit_count *c = &a->unmapped[a->nunmapped++];
        c->field = st_strdup(items[i].field);
        c->value = st_strdup(items[i].value);
        c->count = items[i].count;
        rc = c->field && c->value ? ST_OK : ST_ERR_NOMEM;
    }
    st_free(items);
    return rc;
}

/* ---- the gate --------------------------------------------------------------------- */

static const char *cmp_text(st_cmp c)
{
    static const char *const t[] = {"=", "!=", "<", "<=", ">", ">="};
    return c <= ST_CMP_GE ? t[c] : "?";
}

static st_status add_gate(st_audit *a, const char *statement, const char *rule, double value,
                          double limit, int holds, int fails, const char *detail)
{
    st_audit_gate *g = &a->gates[a->ngates++];
    g->statement = st_strdup(statement);
    g->rule = st_strdup(rule);
    g->value = value;
    g->limit = limit;
    g->passed = !holds;
    g->fails = fails;
    g->detail = st_strdup(detail);
    if (holds && fails)
        a->gate_failed = 1;
    return g->statement && g->rule && g->detail ? ST_OK : ST_ERR_NOMEM;
}

static double share_of(uint64_t part, uint64_t whole)
{
    return whole ? (double)part / (double)whole : 0.0;
}

/* The district a district-completeness line is judged by: for < and <=
** the lowest ratio, for > and >= the highest (the line holds for some
** district exactly when it holds for that one); for = and != the first
** district it holds for, else the first with a ratio. NAN (and *which
** NULL) when no district has a reference count above 0. */
static double district_ratio(const st_audit *a, const st_gate_rule *g, const char **which)
{
    double pick = NAN;
    *which = NULL;
    int low = g->cmp == ST_CMP_LT || g->cmp == ST_CMP_LE;
    int high = g->cmp == ST_CMP_GT || g->cmp == ST_CMP_GE;
    for (size_t i = 0; i < a->nlayer_districts; i++) {
        const st_audit_district *d = &a->districts[i];
        if (d->expected <= 0 || isnan(d->ratio))
            continue;
        int take = !*which || (low && d->ratio < pick) || (high && d->ratio > pick) ||
                   (!low && !high && !st_rules_gate_holds(g, pick) &&
                    st_rules_gate_holds(g, d->ratio));
        if (take) {
            pick = d->ratio;
            *which = d->key;
        }
    }
    return pick;
}

/* The measured quantity as the detail names it: "share(error)", ... */
static void metric_name(const st_audit *a, const st_gate_rule *g, char *out, size_t n)
{
    const char *field = g->field >= 0 && (uint32_t)g->field < a->nfields ? a->fields[g->field] : "?";
    switch (g->metric) {
    case ST_METRIC_SHARE: snprintf(out, n, "share(%s)", st_severity_name(g->severity)); break;
    case ST_METRIC_COMPLETENESS: snprintf(out, n, "completeness(%s)", field); break;
    case ST_METRIC_OBSERVED: snprintf(out, n, "observed(%s)", field); break;
    case ST_METRIC_DISTRICT_COMPLETENESS: snprintf(out, n, "district-completeness"); break;
    }
}

/*
** One gate line. The detail gives the measured value against the limit:
** "share(error) = 0.0380 > 0.02" when the condition holds, "share(error) =
** 0.0092, not > 0.05" when it does not; for district-completeness the
** district that decides: "district-completeness of QM08 = 0.167 < 0.5".
*/
static st_status rule_gate(st_audit *a, const st_gate_rule *g, const uint8_t *worst,
                           const st_audit_input *in)
{
    double v = NAN;
    char detail[512], name[160];
    const char *which = NULL;
    metric_name(a, g, name, sizeof name);
    switch (g->metric) {
    case ST_METRIC_SHARE: {
        uint64_t n = 0;
        for (size_t i = 0; worst && i < in->nfeatures; i++)
            n += worst[i] >= g->severity + 1;
        v = share_of(n, a->total.buildings);
        break;
    }
    case ST_METRIC_COMPLETENESS:
    case ST_METRIC_OBSERVED: {
        const uint64_t *p = a->total.fields[g->field].by_prov;
        uint64_t n = g->metric == ST_METRIC_OBSERVED
                         ? p[ST_PROV_SOURCE] + p[ST_PROV_DERIVED]
                         : a->total.buildings - p[ST_PROV_UNKNOWN];
        v = share_of(n, a->total.buildings);
        break;
    }
    case ST_METRIC_DISTRICT_COMPLETENESS:
        v = district_ratio(a, g, &which);
        if (isnan(v)) {
            snprintf(detail, sizeof detail, "%s: no district has a reference count", name);
            return add_gate(a, g->text, g->rule, v, g->threshold, 0,
                            g->action == ST_GATE_FAIL, detail);
        }
        break;
    }
    int holds = st_rules_gate_holds(g, v);
    char of[ST_PLACE_MAX_KEY + 8] = "";
    if (which)
        snprintf(of, sizeof of, " of %s", which);
    snprintf(detail, sizeof detail, holds ? "%s%s = %.4g %s %g" : "%s%s = %.4g, not %s %g",
             name, of, v, cmp_text(g->cmp), g->threshold);
    return add_gate(a, g->text, g->rule, v, g->threshold, holds, g->action == ST_GATE_FAIL,
                    detail);
}

static st_status evaluate_gates(st_audit *a, const st_audit_input *in, const uint8_t *worst)
{
    size_t n = in->rules ? st_rules_gate_count(in->rules) : 0;
    a->gates = st_calloc(n + 1, sizeof *a->gates);
    if (!a->gates)
        return ST_ERR_NOMEM;
    st_status rc = ST_OK;
    for (size_t i = 0; rc == ST_OK && i < n; i++)
        rc = rule_gate(a, st_rules_gate(in->rules, i), worst, in);
    if (rc == ST_OK && in->fail_on >= 0) {
        uint64_t c = 0;
        for (int s = in->fail_on; s <= ST_SEV_ERROR; s++)
            c += a->total.findings[s];
        const char *word = in->fail_on == ST_SEV_WARNING ? "warn" : "error";
        char stmt[64], detail[160];
        snprintf(stmt, sizeof stmt, "--fail-on %s", word);
        snprintf(detail, sizeof detail, "--fail-on %s: %llu finding(s) at or above that severity",
                 word, (unsigned long long)c);
        rc = add_gate(a, stmt, "--fail-on", (double)c, 0, c > 0, 1, detail);
    }
    return rc;
}

/* ---- the whole audit ------------------------------------------------------------------ */

st_status st_audit_compute(const st_audit_input *in, st_diags *diags, st_audit **out)
{
    *out = NULL;
    st_audit *a = st_calloc(1, sizeof *a);
    if (!a)
        return ST_ERR_NOMEM;
    uint8_t *worst = NULL;
    st_status rc = schema_fields(a, in->rules);
    if (rc == ST_OK)
        rc = make_districts(a, in);
    if (rc == ST_OK) {
        count_features(a, in);
        worst = st_calloc(in->nfeatures ? in->nfeatures : 1, 1);
        rc = worst ? count_findings(a, in, worst) : ST_ERR_NOMEM;
    }
    if (rc == ST_OK) {
        gate_thresholds(a, in->rules);
        compare_reference(a, in);
        rc = copy_learned(a, in);
    }
    if (rc == ST_OK)
        rc = copy_unmapped(a, in);
    if (rc == ST_OK)
        rc = evaluate_gates(a, in, worst);
    st_free(worst);
    if (rc != ST_OK) {
        st_diags_add(diags, ST_SEV_ERROR, rc, NULL, "out of memory in the audit");
        st_audit_free(a);
        return rc;
    }
    *out = a;
    return ST_OK;
}
