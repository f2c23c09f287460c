/*
** pipeline/run_tally.c -- after the per-feature stages: findings in
** building order, the balance per layer, counts per finding code, the
** completeness audit and the gate.
*/
#include <stdlib.h>
#include <string.h>

#include "pipelineInt.h"

st_status st_stage_audit(run_state *s)
{
    int fail_on = s->opt->fail_on == ST_FAIL_ON_WARNING ? ST_SEV_WARNING
                : s->opt->fail_on == ST_FAIL_ON_ERROR ? ST_SEV_ERROR : -1;
    st_audit_input in = {s->features, s->nfeatures, &s->findings, s->districts, s->rules,
                         s->defaults, s->unmapped, s->reference, fail_on};
    return st_audit_compute(&in, s->diags, &s->res->audit);
}

/* Findings in building order (stable: a stage's own order is kept). */
static int by_bid(const void *a, const void *b)
{
    const st_finding *x = a, *y = b;
    if (x->bid != y->bid)
        return x->bid < y->bid ? -1 : 1;
    return x < y ? -1 : x > y;
}

static void sort_findings(st_findings *f)
{
    /* qsort is not stable: make the array order part of the key by
    ** sorting an index first. Simpler: insertion order is bid-major
    ** within each stage, so a merge sort keeps ties in place. */
    size_t n = f->count;
    if (n < 2)
        return;
    st_finding *tmp = st_malloc(n * sizeof *tmp);
    if (!tmp) {
        qsort(f->items, n, sizeof *f->items, by_bid);   /* still ordered by bid */
        return;
    }
    for (size_t width = 1; width < n; width *= 2) {
        for (size_t lo = 0; lo < n; lo += 2 * width) {
            size_t mid = lo + width < n ? lo + width : n;
            size_t hi = lo + 2 * width < n ? lo + 2 * width : n;
            size_t a = lo, b = mid, k = lo;
            while (a < mid && b < hi)
                tmp[k++] = f->items[b].bid < f->items[a].bid ? f->items[b++] : f->items[a++];
            while (a < mid)
                tmp[k++] = f->items[a++];
            while (b < hi)
                tmp[k++] = f->items[b++];
        }
        memcpy(f->items, tmp, n * sizeof *tmp);
    }
    st_free(tmp);
}

static void tally(run_state *s)
{
    for (size_t i = 0; i < s->nfeatures; i++) {
        const st_feature *f = s->features[i];
        st_run_layer *L = &s->res->layers[f->layer];
        switch (f->status) {
        case ST_STATUS_OK: L->kept++; break;
        case ST_STATUS_REPAIRED: L->kept++; L->repaired++; break;
        case ST_STATUS_DUPLICATE: L->duplicate++; break;
        case ST_STATUS_REJECTED: L->rejected++; break;
        }
    }
}

static int by_count(const void *a, const void *b)
{
    const st_run_code_count *x = a, *y = b;
    if (x->count != y->count)
        return x->count > y->count ? -1 : 1;
    return strcmp(x->code, y->code);
}

static st_status count_codes(run_state *s)
{
    st_run_result *r = s->res;
    for (size_t k = 0; k < s->findings.count; k++) {
        const st_finding *g = &s->findings.items[k];
        r->findings[g->severity]++;
        size_t c = 0;
        while (c < r->ncodes && strcmp(r->codes[c].code, g->code) != 0)
            c++;
        if (c == r->ncodes) {
            st_run_code_count *a = st_realloc(r->codes, (c + 1) * sizeof *a);
            if (!a)
                return ST_ERR_NOMEM;
            r->codes = a;
            r->codes[c] = (st_run_code_count){g->code, g->severity, 0};
            r->ncodes++;
        }
        r->codes[c].count++;
        if (g->severity > r->codes[c].severity)
            r->codes[c].severity = g->severity;
    }
    if (r->ncodes > 1)   /* qsort of a NULL array is undefined, even of 0 items */
        qsort(r->codes, r->ncodes, sizeof *r->codes, by_count);
    return ST_OK;
}

/* The gate as the audit judged it (rule gate lines, then --fail-on): the
** first failing line says why. */
st_status st_stage_gate(run_state *s)
{
    st_run_result *r = s->res;
    const st_audit *a = r->audit;
    r->gate_failed = a->gate_failed;
    for (size_t i = 0; i < a->ngates && !r->gate_reason; i++) {
        const st_audit_gate *g = &a->gates[i];
        if (!g->passed && g->fails && !(r->gate_reason = st_strdup_printf("%s (%s)", g->detail,
                                                                          g->rule)))
            return ST_ERR_NOMEM;
    }
    return ST_OK;
}


st_status st_stage_findings(run_state *s)
{
    sort_findings(&s->findings);
    tally(s);
    return count_codes(s);
}
