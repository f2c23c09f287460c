/*
** report/text.c -- the terminal summary printed at the end of a run (the
** CLI prints it; with -q it does not).
**
** Input:  st_report_input (borrowed).
** Output: plain UTF-8 text, lines under 100 columns: the balance per
**         layer, findings by severity and the most frequent codes, the
**         districts against the reference, field completeness, each gate
**         and the outputs.
** Errors: ST_ERR_NOMEM or ST_ERR_LIMIT from the buffer.
*/
#include <math.h>
#include <stdio.h>
#include <string.h>

#include "reportInt.h"

#define TOP_CODES 8
#define LIST_DISTRICTS 6
#define TOP_UNMAPPED 10
#define TOP_LEARNED 10
#define TABLE_DISTRICTS 31   /* 30 and the unassigned bucket */

static void balance(st_rout *o, const st_run_result *r)
{
    st_rout_printf(o, "%-24s %10s %10s %10s %10s %10s\n", "layer", "read", "buildings",
                   "repaired", "duplicate", "rejected");
    st_run_layer t;
    st_rep_balance_total(r, &t);
    t.name = (char *)"all layers";
    for (size_t l = 0; l <= r->nlayers; l++) {
        const st_run_layer *L = l < r->nlayers ? &r->layers[l] : &t;
        if (l == r->nlayers && r->nlayers < 2)
            break;
        int balanced = L->read == L->kept + L->duplicate + L->rejected;
        st_rout_printf(o, "%-24s %10llu %10llu %10llu %10llu %10llu%s\n", L->name,
                       (unsigned long long)L->read, (unsigned long long)L->kept,
                       (unsigned long long)L->repaired, (unsigned long long)L->duplicate,
                       (unsigned long long)L->rejected, balanced ? "" : "  UNBALANCED");
    }
    st_rout_puts(o, "read = buildings + set aside (duplicate + rejected) for every layer\n");
}

static void findings(st_rout *o, const st_run_result *r)
{
    if (!r->ncodes) {
        st_rout_puts(o, "\nfindings: none\n");
        return;
    }
    st_rout_printf(o, "\nfindings: %llu error, %llu warning, %llu note; most frequent:\n",
                   (unsigned long long)r->findings[ST_SEV_ERROR],
                   (unsigned long long)r->findings[ST_SEV_WARNING],
                   (unsigned long long)r->findings[ST_SEV_NOTE]);
    for (size_t c = 0; c < r->ncodes && c < TOP_CODES; c++)
        st_rout_printf(o, "  %-32s %-8s %10llu\n", r->codes[c].code,
                       st_severity_name(r->codes[c].severity),
                       (unsigned long long)r->codes[c].count);
    if (r->ncodes > TOP_CODES)
        st_rout_printf(o, "  ... and %zu more codes in the report\n", r->ncodes - TOP_CODES);
}

/* "QM08 17%, QM03 61%" for the districts in state s, lowest ratio first. */
static void district_list(st_rout *o, const st_audit *a, st_ref_state s)
{
    size_t shown = 0, n = 0;
    for (size_t i = 0; i < a->ndistricts; i++)
        n += a->districts[i].ref == s;
    /* a selection by ratio, without allocating: take the next lowest each time */
    double last = -INFINITY;
    size_t last_i = (size_t)-1;
    while (shown < n && shown < LIST_DISTRICTS) {
        size_t best = (size_t)-1;
        for (size_t i = 0; i < a->ndistricts; i++) {
            const st_audit_district *d = &a->districts[i];
            if (d->ref != s || d->ratio < last || (d->ratio == last && i <= last_i))
                continue;
            if (best == (size_t)-1 || d->ratio < a->districts[best].ratio)
                best = i;
        }
        if (best == (size_t)-1)
            break;
        st_rout_printf(o, "%s%s %.0f%%", shown ? ", " : " (", a->districts[best].key,
                       100.0 * a->districts[best].ratio);
        last = a->districts[best].ratio;
        last_i = best;
        shown++;
    }
    if (shown)
        st_rout_printf(o, "%s)", n > shown ? ", ..." : "");
}

static int flagged(const st_audit_district *d)
{
    return d->ref == ST_REF_UNDER || d->ref == ST_REF_OVER || d->ref == ST_REF_ABSENT;
}

/* Every district while there are few, else only the flagged ones. */
static void district_table(st_rout *o, const st_audit *a)
{
    int all = a->ndistricts <= TABLE_DISTRICTS;
    size_t shown = 0;
    for (size_t i = 0; i < a->ndistricts; i++) {
        const st_audit_district *d = &a->districts[i];
        if (!all && !flagged(d))
            continue;
        if (!shown++)
            st_rout_printf(o, "  %-22s %10s %10s %7s  %s\n",
                           all ? "district" : "district (flagged)", "buildings", "expected",
                           "ratio", "reference");
        st_rout_printf(o, "  %-22s %10llu", d->key, (unsigned long long)d->buildings);
        if (d->expected >= 0)
            st_rout_printf(o, " %10lld %7.2f  %s", (long long)d->expected, d->ratio,
                           st_rep_ref_words(d->ref));
        st_rout_puts(o, "\n");
    }
}

static void learned(st_rout *o, const st_audit *a)
{
    if (!a->nlearned)
        return;
    st_rout_puts(o, "\ndefaults learned from the data:\n");
    for (size_t i = 0; i < a->nlearned && i < TOP_LEARNED; i++) {
        const st_audit_learned *l = &a->learned[i];
        st_rout_printf(o, "  %-12s in %-14s from %llu buildings: %s\n", l->field,
                       l->district ? l->district : "all", (unsigned long long)l->from_buildings,
                       l->distribution ? l->distribution : "");
    }
    if (a->nlearned > TOP_LEARNED)
        st_rout_printf(o, "  ... and %zu more in the report\n", a->nlearned - TOP_LEARNED);
}

static void districts(st_rout *o, const st_audit *a)
{
    size_t counts[5] = {0};
    for (size_t i = 0; i < a->ndistricts; i++)
        counts[a->districts[i].ref]++;
    /* the layer's districts: not the reference's absent ones, not "none" */
    size_t nd = 0;
    const st_audit_district *none = NULL;
    for (size_t i = 0; i < a->ndistricts; i++) {
        const st_audit_district *d = &a->districts[i];
        if (!d->geom && !strcmp(d->key, "none"))
            none = d;
        else
            nd += d->ref != ST_REF_ABSENT;
    }
    st_rout_printf(o, "\ndistricts: %zu", nd);
    if (none)
        st_rout_printf(o, "; outside every district: %llu buildings",
                       (unsigned long long)none->buildings);
    st_rout_puts(o, "\n");
    district_table(o, a);
    if (counts[ST_REF_OK] + counts[ST_REF_UNDER] + counts[ST_REF_OVER] == 0)
        return;
    st_rout_printf(o, "  against the reference: %zu within thresholds\n", counts[ST_REF_OK]);
    st_rout_printf(o, "    under-mapped: %zu", counts[ST_REF_UNDER]);
    district_list(o, a, ST_REF_UNDER);
    st_rout_printf(o, "\n    over-mapped: %zu", counts[ST_REF_OVER]);
    district_list(o, a, ST_REF_OVER);
    st_rout_puts(o, "\n");
    if (a->nref_unknown)
        st_rout_printf(o, "  %zu reference key(s) match no district\n", a->nref_unknown);
}

static void fields(st_rout *o, const st_audit *a)
{
    if (!a->nfields || !a->total.fields)
        return;
    st_rout_puts(o, "\nfields (share of buildings): known = observed + assumed\n");
    for (uint32_t i = 0; i < a->nfields; i++) {
        const st_audit_field *f = &a->total.fields[i];
        uint64_t t = st_rep_field_total(f);
        if (!t)
            continue;
        double obs = (double)(f->by_prov[ST_PROV_SOURCE] + f->by_prov[ST_PROV_DERIVED]) / (double)t;
        double ass = (double)(f->by_prov[ST_PROV_DEFAULT] + f->by_prov[ST_PROV_DRAWN]) / (double)t;
        st_rout_printf(o, "  %-20s %5.1f%% = %5.1f%% observed + %5.1f%% assumed\n", a->fields[i],
                       100 * (obs + ass), 100 * obs, 100 * ass);
    }
}

static void unmapped(st_rout *o, const st_report_input *in)
{
    size_t n = st_rep_unmapped_count(in);
    if (!n)
        return;
    st_rout_puts(o, "\nunmapped source values (add map lines for these first):\n");
    for (size_t i = 0; i < n && i < TOP_UNMAPPED; i++) {
        const char *field, *value;
        uint64_t count;
        st_rep_unmapped_at(in, i, &field, &value, &count);
        st_rout_printf(o, "  %-16s %-32s %10llu\n", field, value, (unsigned long long)count);
    }
    if (n > TOP_UNMAPPED)
        st_rout_printf(o, "  ... and %zu more in the report\n", n - TOP_UNMAPPED);
}

static void gates(st_rout *o, const st_report_input *in)
{
    st_audit_gate fallback;
    const st_audit_gate *g = NULL;
    size_t n = st_rep_gates(in, &fallback, &g);
    int failed = st_rep_gate_failed(in);
    st_rout_printf(o, "\ngate: %s", failed ? "FAILED" : "passed");
    if (!n)
        st_rout_puts(o, in->run->gate_reason ? "" : " (no gate condition was evaluated)");
    if (in->run->gate_reason)
        st_rout_printf(o, " -- %s", in->run->gate_reason);
    st_rout_puts(o, "\n");
    for (size_t i = 0; in->audit && i < n; i++) {
        st_rout_printf(o, "  %-7s %s", st_rep_gate_word(&g[i]), g[i].statement);
        if (g[i].rule)
            st_rout_printf(o, " [%s]", g[i].rule);
        if (g[i].detail)
            st_rout_printf(o, ": %s", g[i].detail);
        else if (isfinite(g[i].value) && isfinite(g[i].limit))
            st_rout_printf(o, ": measured %.4g, limit %.4g", g[i].value, g[i].limit);
        st_rout_puts(o, "\n");
    }
}

st_status st_report_text(const st_report_input *in, st_buf *out)
{
    st_rout o = {out, ST_OK};
    st_rout_puts(&o, "\n");
    balance(&o, in->run);
    findings(&o, in->run);
    if (in->audit) {
        districts(&o, in->audit);
        fields(&o, in->audit);
        learned(&o, in->audit);
    }
    unmapped(&o, in);
    gates(&o, in);
    for (size_t i = 0; i < in->noutputs; i++)
        st_rout_printf(&o, "%s%s", i ? "\n        " : "\nwritten: ", in->outputs[i]);
    if (in->noutputs)
        st_rout_puts(&o, "\n");
    return o.rc;
}
