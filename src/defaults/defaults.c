/*
** defaults/defaults.c -- choosing and applying defaults: precedence by
** district, region, everywhere; distributions learned from the data; the
** two fill modes; the order in which fields are filled.
**
** Input:   the rule set's inline defaults, tables (dtable.c) and learn
**          lines; the district keys and regions; kept buildings.
** Output:  schema values with provenance `default` or `drawn` and the
**          rule that set them; the list of learned defaults.
** Errors:  table errors (dtable.c); ST_ERR_NOMEM. A cycle among the
**          fields the conditions read is a warning: those fields are
**          filled in schema order.
** Limits:  those of the tables; every pattern is matched once per
**          district or region, not once per building.
*/
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "defaultsInt.h"

const char *st_fill_mode_name(st_fill_mode m)
{
    return m == ST_FILL_DRAW ? "draw" : "most-likely";
}

/* ---- small helpers -------------------------------------------------------- */

const char *st_defaults_keep_owned(st_defaults *d, char *s)
{
    if (!s)
        return NULL;
    if (d->nowned == d->capowned) {
        size_t cap = d->capowned ? 2 * d->capowned : 64;
        char **a = st_realloc(d->owned, cap * sizeof *a);
        if (!a) {
            st_free(s);
            return NULL;
        }
        d->owned = a;
        d->capowned = cap;
    }
    d->owned[d->nowned++] = s;
    return s;
}

const char *st_defaults_keep(st_defaults *d, const char *s)
{
    return st_defaults_keep_owned(d, st_strdup(s));
}

st_status st_defaults_new_entry(st_defaults *d, dentry **out)
{
    if (d->ne == d->cape) {
        size_t cap = d->cape ? 2 * d->cape : 64;
        dentry *a = st_realloc(d->e, cap * sizeof *a);
        if (!a)
            return ST_ERR_NOMEM;
        d->e = a;
        d->cape = cap;
    }
    *out = &d->e[d->ne++];
    memset(*out, 0, sizeof **out);
    return ST_OK;
}

/* The choice with the largest share; the first written on a tie. */
static uint32_t most_likely(const dentry *e)
{
    uint32_t best = 0;
    for (uint32_t i = 1; i < e->nchoices; i++)
        if (e->choices[i].share > e->choices[best].share)
            best = i;
    return best;
}

static uint64_t splitmix(uint64_t z)
{
    z += 0x9E3779B97F4A7C15ull;
    z = (z ^ (z >> 30)) * 0xBF58476D1CE4E5B9ull;
    z = (z ^ (z >> 27)) * 0x94D049BB133111EBull;
    return z ^ (z >> 31);
}

double st_defaults_uniform(uint64_t seed, uint64_t bid, uint32_t field)
{
    uint64_t h = splitmix(splitmix(splitmix(seed) ^ bid) ^ field);
    return (double)(h >> 11) * 0x1.0p-53;
}

/* ---- setting up --------------------------------------------------------- */

static st_status copy_places(st_defaults *d, const st_defaults_places *pl)
{
    d->nd = pl->n;
    d->dkeys = st_calloc(pl->n ? pl->n : 1, sizeof *d->dkeys);
    d->dregion = st_calloc(pl->n ? pl->n : 1, sizeof *d->dregion);
    d->regions = st_strtab_new(0, 0);
    if (!d->dkeys || !d->dregion || !d->regions)
        return ST_ERR_NOMEM;
    for (size_t i = 0; i < pl->n; i++) {
        if (!(d->dkeys[i] = st_strdup(pl->district[i])))
            return ST_ERR_NOMEM;
        const char *r = pl->region ? pl->region[i] : NULL;
        d->dregion[i] = -1;
        if (r) {
            uint32_t id;
            st_status rc = st_strtab_intern(d->regions, r, strlen(r), &id, NULL);
            if (rc != ST_OK)
                return rc;
            d->dregion[i] = (int32_t)id;
        }
    }
    return ST_OK;
}

static st_status add_inline(st_defaults *d)
{
    for (size_t i = 0; i < st_rules_default_count(d->rules); i++) {
        const st_default_rule *r = st_rules_default(d->rules, i);
        dentry *e = NULL;
        st_status rc = st_defaults_new_entry(d, &e);
        if (rc != ST_OK)
            return rc;
        e->src = SRC_INLINE;
        e->scope = r->scope;
        e->pattern = r->pattern;
        e->field = r->field;
        e->inl = r;
        e->rule = r->rule;
        e->nchoices = r->nchoices;
        e->choices = st_malloc(r->nchoices * sizeof *e->choices);
        if (!e->choices)
            return ST_ERR_NOMEM;
        for (uint32_t k = 0; k < r->nchoices; k++)
            e->choices[k] = (dchoice){r->choices[k].value, r->choices[k].share};
    }
    return ST_OK;
}

/* Does any default entry for field f read field g in its condition? */
static int depends(const st_defaults *d, uint32_t f, uint32_t g)
{
    for (size_t i = 0; i < d->ne; i++) {
        const dentry *e = &d->e[i];
        if (e->field != f)
            continue;
        if (e->inl && st_rules_when_uses(e->inl, g))
            return 1;
        for (uint32_t k = 0; k < e->nconds; k++)
            if (e->conds[k].field == g)
                return 1;
    }
    return 0;
}

/* Fields in an order where each comes after the fields its defaults'
** conditions read; the lowest schema index first among those ready. */
static st_status fill_order(st_defaults *d, st_diags *diags)
{
    uint32_t n = d->nfields;
    d->order = st_malloc((n ? n : 1) * sizeof *d->order);
    uint8_t *dep = st_calloc((size_t)n * n + 1, 1);
    uint8_t *done = st_calloc(n + 1, 1);
    st_status rc = d->order && dep && done ? ST_OK : ST_ERR_NOMEM;
    for (uint32_t f = 0; rc == ST_OK && f < n; f++)
        for (uint32_t g = 0; g < n; g++)
            dep[(size_t)f * n + g] = g != f && depends(d, f, g);
    uint32_t k = 0;
    while (rc == ST_OK && k < n) {
        uint32_t pick = n;
        for (uint32_t f = 0; f < n && pick == n; f++) {
            if (done[f])
                continue;
            uint32_t g = 0;
            while (g < n && !(dep[(size_t)f * n + g] && !done[g]))
                g++;
            if (g == n)
                pick = f;
        }
        if (pick == n) {       /* a cycle: the first field left goes next */
            for (pick = 0; done[pick]; pick++)
                ;
            st_diags_add(diags, ST_SEV_WARNING, ST_OK, NULL,
                         "defaults: the conditions of '%s' depend on fields that depend on "
                         "it; fields in that cycle are filled in schema order",
                         st_rules_field(d->rules, pick)->name);
        }
        done[pick] = 1;
        d->order[k++] = pick;
    }
    st_free(dep);
    st_free(done);
    return rc;
}

st_status st_defaults_new(const st_rules *rules, const st_defaults_places *places,
                          st_diags *diags, st_defaults **out)
{
    *out = NULL;
    st_defaults *d = st_calloc(1, sizeof *d);
    if (!d)
        return ST_ERR_NOMEM;
    d->rules = rules;
    d->nfields = st_rules_field_count(rules);
    d->diags = diags;
    st_status rc = copy_places(d, places);
    if (rc == ST_OK)
        rc = add_inline(d);
    for (size_t i = 0; rc == ST_OK && i < st_rules_table_count(rules); i++)
        rc = st_defaults_read_table(d, st_rules_table(rules, i), diags);
    for (size_t i = 0; rc == ST_OK && i < d->ne; i++)
        d->e[i].best = most_likely(&d->e[i]);
    if (rc == ST_OK)
        rc = fill_order(d, diags);
    if (rc != ST_OK) {
        if (rc == ST_ERR_NOMEM)
            st_diags_add(diags, ST_SEV_ERROR, rc, NULL, "out of memory preparing defaults");
        st_defaults_free(d);
        return rc;
    }
    *out = d;
    return ST_OK;
}

void st_defaults_free(st_defaults *d)
{
    if (!d)
        return;
    for (size_t i = 0; d->e && i < d->ne; i++) {
        st_free(d->e[i].choices);
        st_free(d->e[i].conds);
    }
    st_free(d->e);
    for (size_t i = 0; d->dkeys && i < d->nd; i++)
        st_free(d->dkeys[i]);
    st_free(d->dkeys);
    st_free(d->dregion);
    st_strtab_free(d->regions);
    for (size_t i = 0; i < d->nowned; i++)
        st_free(d->owned[i]);
    st_free(d->owned);
    st_free(d->learned);
    st_free(d->learned_d);
    st_free(d->learned_r);
    st_free(d->doff);
    st_free(d->roff);
    st_free(d->didx);
    st_free(d->ridx);
    st_free(d->every);
    st_free(d->order);
    st_free(d);
}

/* ---- learning from the data ---------------------------------------------- */

typedef struct pair {
    uint32_t group;    /* district or region */
    uint32_t value;    /* id in the value table */
} pair;

static int by_group_value(const void *a, const void *b)
{
    const pair *x = a, *y = b;
    if (x->group != y->group)
        return x->group < y->group ? -1 : 1;
    return x->value < y->value ? -1 : x->value > y->value;
}

typedef struct vcount {
    const char *value;
    uint64_t n;
} vcount;

static int by_count(const void *a, const void *b)
{
    const vcount *x = a, *y = b;
    if (x->n != y->n)
        return x->n > y->n ? -1 : 1;
    return strcmp(x->value, y->value);
}

static int is_kept(const st_feature *f)
{
    return f->status == ST_STATUS_OK || f->status == ST_STATUS_REPAIRED;
}

static st_status add_learned_report(st_defaults *d, const dentry *e, const char *where,
                                    int per_region, uint64_t from)
{
    if (d->nlearned == d->caplearned) {
        size_t cap = d->caplearned ? 2 * d->caplearned : 16;
        st_defaults_learned *a = st_realloc(d->learned, cap * sizeof *a);
        if (!a)
            return ST_ERR_NOMEM;
        d->learned = a;
        d->caplearned = cap;
    }
    st_buf b;
    st_buf_init(&b, 0);
    st_status rc = ST_OK;
    for (uint32_t i = 0; rc == ST_OK && i < e->nchoices; i++)
        rc = st_buf_printf(&b, "%s%s %.1f%%", i ? ", " : "", e->choices[i].value,
                           100.0 * e->choices[i].share);
    const char *text = rc == ST_OK ? st_defaults_keep_owned(d, st_buf_take(&b)) : NULL;
    st_buf_free(&b);
    if (!text)
        return ST_ERR_NOMEM;
    d->learned[d->nlearned++] =
        (st_defaults_learned){where, per_region, e->field, from, text, e->rule};
    return ST_OK;
}

/* One group's run of sorted pairs [lo, hi) becomes a learned entry. */
static st_status learn_group(st_defaults *d, const st_default_learn *L, st_strtab *values,
                             const pair *p, size_t lo, size_t hi)
{
    int per_region = L->per == ST_SCOPE_REGION;
    uint32_t g = p[lo].group;
    int32_t *slot = per_region ? &d->learned_r[(size_t)g * d->nfields + L->field]
                               : &d->learned_d[(size_t)g * d->nfields + L->field];
    if (hi - lo < L->min_count || *slot >= 0)   /* too few, or an earlier line won */
        return ST_OK;
    size_t nv = 0;
    for (size_t i = lo; i < hi; i++)
        nv += i == lo || p[i].value != p[i - 1].value;
    vcount *vc = st_malloc(nv * sizeof *vc);
    if (!vc)
        return ST_ERR_NOMEM;
    nv = 0;
    for (size_t i = lo; i < hi; i++) {
        if (i == lo || p[i].value != p[i - 1].value)
            vc[nv++] = (vcount){st_strtab_get(values, p[i].value, NULL), 0};
        vc[nv - 1].n++;
    }
    qsort(vc, nv, sizeof *vc, by_count);
    dentry *e = NULL;
    st_status rc = st_defaults_new_entry(d, &e);
    if (rc == ST_OK) {
        e->src = SRC_LEARNED;
        e->scope = L->per;
        e->field = L->field;
        e->rule = L->rule;
        e->choices = st_malloc(nv * sizeof *e->choices);
        rc = e->choices ? ST_OK : ST_ERR_NOMEM;
    }
    for (size_t i = 0; rc == ST_OK && i < nv; i++) {
        e->choices[i].value = st_defaults_keep(d, vc[i].value);
        e->choices[i].share = (double)vc[i].n / (double)(hi - lo);
        e->nchoices++;
        rc = e->choices[i].value ? ST_OK : ST_ERR_NOMEM;
    }
    st_free(vc);
    if (rc != ST_OK)
        return rc;
    e->best = 0;               /* sorted by count: the first is the most frequent */
    *slot = (int32_t)(e - d->e);
    const char *where = per_region ? st_strtab_get(d->regions, g, NULL) : d->dkeys[g];
    return add_learned_report(d, e, where, per_region, hi - lo);
}

static st_status learn_one(st_defaults *d, const st_default_learn *L, st_feature *const *fs,
                           size_t n)
{
    pair *p = st_malloc((n ? n : 1) * sizeof *p);
    st_strtab *values = st_strtab_new(0, 0);
    st_status rc = p && values ? ST_OK : ST_ERR_NOMEM;
    size_t np = 0;
    for (size_t i = 0; rc == ST_OK && i < n; i++) {
        const st_feature *f = fs[i];
        if (!is_kept(f) || f->district < 0 || (size_t)f->district >= d->nd ||
            L->field >= f->nschema)
            continue;
        const st_field_value *v = &f->schema[L->field];
        if (!v->text || (v->from != ST_PROV_SOURCE && v->from != ST_PROV_DERIVED))
            continue;
        int32_t g = L->per == ST_SCOPE_REGION ? d->dregion[f->district] : f->district;
        if (g < 0)
            continue;
        uint32_t id;
        rc = st_strtab_intern(values, v->text, strlen(v->text), &id, NULL);
        if (rc == ST_OK)
            p[np++] = (pair){(uint32_t)g, id};
    }
    if (rc == ST_OK)
        qsort(p, np, sizeof *p, by_group_value);
    for (size_t lo = 0; rc == ST_OK && lo < np;) {
        size_t hi = lo;
        while (hi < np && p[hi].group == p[lo].group)
            hi++;
        rc = learn_group(d, L, values, p, lo, hi);
        lo = hi;
    }
    st_free(p);
    st_strtab_free(values);
    return rc;
}

static st_status build(st_defaults *d);

st_status st_defaults_learn(st_defaults *d, st_feature *const *fs, size_t n)
{
    size_t nr = st_strtab_count(d->regions);
    size_t nf = d->nfields ? d->nfields : 1;
    st_free(d->learned_d);
    st_free(d->learned_r);
    d->learned_d = st_malloc((d->nd ? d->nd : 1) * nf * sizeof *d->learned_d);
    d->learned_r = st_malloc((nr ? nr : 1) * nf * sizeof *d->learned_r);
    if (!d->learned_d || !d->learned_r)
        return ST_ERR_NOMEM;
    memset(d->learned_d, 0xFF, (d->nd ? d->nd : 1) * nf * sizeof *d->learned_d);
    memset(d->learned_r, 0xFF, (nr ? nr : 1) * nf * sizeof *d->learned_r);
    st_status rc = ST_OK;
    for (size_t i = 0; rc == ST_OK && i < st_rules_learn_count(d->rules); i++)
        rc = learn_one(d, st_rules_learn(d->rules, i), fs, n);
    return rc == ST_OK ? build(d) : rc;
}

/* ---- matching patterns once per district and region --------------------- */

typedef struct match {
    uint32_t place;
    uint32_t entry;
} match;

typedef struct matches {
    match *m;
    size_t n, cap;
} matches;

static st_status push_match(matches *ms, uint32_t place, uint32_t entry)
{
    if (ms->n == ms->cap) {
        size_t cap = ms->cap ? 2 * ms->cap : 256;
        match *a = st_realloc(ms->m, cap * sizeof *a);
        if (!a)
            return ST_ERR_NOMEM;
        ms->m = a;
        ms->cap = cap;
    }
    ms->m[ms->n++] = (match){place, entry};
    return ST_OK;
}

/* CSR of the matches by place; entries stay in entry order within a place
** (a counting sort is stable). */
static st_status to_csr(const matches *ms, size_t nplaces, size_t **off, uint32_t **idx)
{
    *off = st_calloc(nplaces + 1, sizeof **off);
    *idx = st_malloc((ms->n ? ms->n : 1) * sizeof **idx);
    if (!*off || !*idx)
        return ST_ERR_NOMEM;
    for (size_t i = 0; i < ms->n; i++)
        (*off)[ms->m[i].place + 1]++;
    for (size_t p = 0; p < nplaces; p++)
        (*off)[p + 1] += (*off)[p];
    size_t *fill = st_malloc((nplaces ? nplaces : 1) * sizeof *fill);
    if (!fill)
        return ST_ERR_NOMEM;
    memcpy(fill, *off, nplaces * sizeof *fill);
    for (size_t i = 0; i < ms->n; i++)
        (*idx)[fill[ms->m[i].place]++] = ms->m[i].entry;
    st_free(fill);
    return ST_OK;
}

static int has_wildcard(const char *p)
{
    return strchr(p, '*') || strchr(p, '?');
}

/* Every place in names[0..n) the pattern of entry ei matches. */
static st_status match_entry(const char *pattern, uint32_t ei, const char *const *names,
                             size_t n, matches *ms)
{
    int wild = has_wildcard(pattern);
    for (size_t p = 0; p < n; p++) {
        /* Without a wildcard the pattern is a name (compared ignoring ASCII
        ** case, as st_rules_glob does); skip the glob when lengths differ. */
        if (!wild && strlen(names[p]) != strlen(pattern))
            continue;
        if (st_rules_glob(pattern, names[p])) {
            st_status rc = push_match(ms, (uint32_t)p, ei);
            if (rc != ST_OK)
                return rc;
        }
    }
    return ST_OK;
}

static st_status build(st_defaults *d)
{
    size_t nr = st_strtab_count(d->regions);
    st_free(d->doff);
    st_free(d->didx);
    st_free(d->roff);
    st_free(d->ridx);
    st_free(d->every);
    d->doff = d->roff = NULL;
    d->didx = d->ridx = NULL;
    const char **rnames = st_malloc((nr ? nr : 1) * sizeof *rnames);
    matches dm = {NULL, 0, 0}, rm = {NULL, 0, 0};
    d->every = st_malloc((d->ne ? d->ne : 1) * sizeof *d->every);
    st_status rc = rnames && d->every ? ST_OK : ST_ERR_NOMEM;
    for (size_t r = 0; rc == ST_OK && r < nr; r++)
        rnames[r] = st_strtab_get(d->regions, (uint32_t)r, NULL);
    d->nevery = 0;
    for (size_t i = 0; rc == ST_OK && i < d->ne; i++) {
        const dentry *e = &d->e[i];
        if (e->src == SRC_LEARNED)
            continue;          /* reached through learned_d / learned_r */
        if (e->scope == ST_SCOPE_EVERYWHERE)
            d->every[d->nevery++] = (uint32_t)i;
        else if (e->scope == ST_SCOPE_DISTRICT)
            rc = match_entry(e->pattern, (uint32_t)i, (const char *const *)d->dkeys, d->nd, &dm);
        else
            rc = match_entry(e->pattern, (uint32_t)i, rnames, nr, &rm);
    }
    if (rc == ST_OK)
        rc = to_csr(&dm, d->nd, &d->doff, &d->didx);
    if (rc == ST_OK)
        rc = to_csr(&rm, nr, &d->roff, &d->ridx);
    st_free(dm.m);
    st_free(rm.m);
    st_free(rnames);
    d->built = rc == ST_OK;
    return rc;
}

/* ---- applying ------------------------------------------------------------ */

static int cond_holds(const dcond *c, const st_feature *f)
{
    const st_field_value *v = &f->schema[c->field];
    if (v->from == ST_PROV_UNKNOWN || !v->text)
        return 0;
    if (!c->is_range)
        return !strcmp(v->text, c->text);
    char *end;
    double x = strtod(v->text, &end);
    return end != v->text && x >= c->lo && x <= c->hi;
}

static int entry_holds(const dentry *e, st_rules_ctx *ctx, const st_feature *f)
{
    if (e->inl)
        return st_rules_when(ctx, e->inl, f);
    for (uint32_t k = 0; k < e->nconds; k++)
        if (!cond_holds(&e->conds[k], f))
            return 0;
    return 1;
}

static void set_value(const dentry *e, st_feature *f, st_fill_mode mode, uint64_t seed)
{
    uint32_t pick = e->best;
    st_provenance from = ST_PROV_DEFAULT;
    /* A single value is a default in either mode: nothing is drawn. */
    if (mode == ST_FILL_DRAW && e->nchoices > 1) {
        double u = st_defaults_uniform(seed, f->bid, e->field), cum = 0;
        pick = e->nchoices - 1;
        for (uint32_t i = 0; i < e->nchoices; i++) {
            cum += e->choices[i].share;
            if (u < cum) {
                pick = i;
                break;
            }
        }
        from = ST_PROV_DRAWN;
    }
    st_field_value *v = &f->schema[e->field];
    st_field_value_borrow(v, e->choices[pick].value);   /* d outlives f's use */
    v->from = from;
    v->rule = e->rule;
}

/* The first entry among idx[lo, hi) for 'field' whose condition holds. */
static const dentry *first_of(const st_defaults *d, const uint32_t *idx, size_t lo, size_t hi,
                              uint32_t field, st_rules_ctx *ctx, const st_feature *f)
{
    for (size_t i = lo; i < hi; i++) {
        const dentry *e = &d->e[idx[i]];
        if (e->field == field && entry_holds(e, ctx, f))
            return e;
    }
    return NULL;
}

static const dentry *choose(const st_defaults *d, st_rules_ctx *ctx, const st_feature *f,
                            uint32_t field)
{
    const dentry *e = NULL;
    if (f->district >= 0 && (size_t)f->district < d->nd) {
        size_t p = (size_t)f->district;
        int32_t l = d->learned_d ? d->learned_d[p * d->nfields + field] : -1;
        e = l >= 0 ? &d->e[l] : first_of(d, d->didx, d->doff[p], d->doff[p + 1], field, ctx, f);
        int32_t r = d->dregion[p];
        if (!e && r >= 0) {
            l = d->learned_r ? d->learned_r[(size_t)r * d->nfields + field] : -1;
            e = l >= 0 ? &d->e[l]
                       : first_of(d, d->ridx, d->roff[r], d->roff[r + 1], field, ctx, f);
        }
    }
    return e ? e : first_of(d, d->every, 0, d->nevery, field, ctx, f);
}

st_status st_defaults_apply(st_defaults *d, st_rules_ctx *ctx, st_feature *f,
                            st_fill_mode mode, uint64_t seed)
{
    st_status rc = d->built ? ST_OK : build(d);
    if (rc != ST_OK || f->nschema != d->nfields)
        return rc;
    for (uint32_t k = 0; rc == ST_OK && k < d->nfields; k++) {
        uint32_t field = d->order[k];
        if (f->schema[field].from != ST_PROV_UNKNOWN)
            continue;
        const dentry *e = choose(d, ctx, f, field);
        if (e)
            set_value(e, f, mode, seed);
    }
    return rc;
}

size_t st_defaults_learned_count(const st_defaults *d) { return d->nlearned; }

const st_defaults_learned *st_defaults_learned_get(const st_defaults *d, size_t i)
{
    return &d->learned[i];
}
