/*
** pipeline/merge.c -- reading the parts of a job split by windows back
** into one run's state, so that defaults, audit, gate, inventory and
** report follow exactly as in a single run (docs/scale.md).
**
** Input:   the parts (opt->inputs), written by run --tile / --bbox.
** Output:  s->features (every feature of every input layer once, in bid
**          order), s->findings (per building in the order the stages made
**          them), the layers with their fields and totals, the unmapped
**          counts.
** Errors:  ST_ERR_USAGE when the parts do not belong together: made with
**          other rules, districts, reference or options than this merge,
**          from other input layers, a building in two parts (windows that
**          overlap), or features in no part (a window missing). Each
**          message names the part and what differs. ST_ERR_FORMAT for a
**          damaged part (part.h); ST_ERR_NOMEM.
*/
#include <stdarg.h>
#include <stdlib.h>
#include <string.h>

#include "stocktake/part.h"
#include "pipelineInt.h"

static st_status fail(run_state *s, const char *fmt, ...) ST_PRINTF(2, 3);
static st_status fail(run_state *s, const char *fmt, ...)
{
    va_list ap;
    va_start(ap, fmt);
    st_diags_addv(s->diags, ST_SEV_ERROR, ST_ERR_USAGE, NULL, fmt, ap);
    va_end(ap);
    return ST_ERR_USAGE;
}

/* The part was made with the rules, districts, reference and options of
** this merge. */
static st_status same_context(run_state *s, const st_part *p, const run_context *c)
{
    for (size_t i = 0; i < c->n; i++) {
        const char *v = st_part_info(p, c->keys[i]);
        if (!v || strcmp(v, c->values[i]) != 0)
            return fail(s, "%s: made with other %s than this merge: the part has '%s'",
                        st_part_path(p), c->keys[i] + strlen("context."), v ? v : "nothing");
    }
    return ST_OK;
}

/* The first part sets the layers; the others must have the same ones. */
static st_status take_layers(run_state *s, const st_part *p, int first)
{
    size_t n = 0;
    const st_part_layer *pl = st_part_layers(p, &n);
    st_run_result *r = s->res;
    if (first) {
        for (size_t l = 0; l < s->nfields; l++)
            st_fields_free(&s->fields[l]);
        st_free(s->fields);
        st_free(r->layers);
        r->nlayers = 0;
        s->nfields = 0;
        r->layers = st_calloc(n ? n : 1, sizeof *r->layers);
        s->fields = st_calloc(n ? n : 1, sizeof *s->fields);
        if (!r->layers || !s->fields)
            return ST_ERR_NOMEM;
        r->nlayers = n;
        s->nfields = n;
        for (size_t l = 0; l < n; l++) {
            st_run_layer *L = &r->layers[l];
            L->name = st_strdup(pl[l].name);
            L->path = st_strdup(pl[l].path);
            L->format = st_strdup(pl[l].format);
            L->crs = st_strdup(pl[l].crs);
            if (!L->name || !L->path || !L->format || !L->crs ||
                st_fields_copy(&s->fields[l], &pl[l].fields) != ST_OK)
                return ST_ERR_NOMEM;
            L->read = pl[l].read;
        }
        return ST_OK;
    }
    int same = n == r->nlayers;
    for (size_t l = 0; same && l < n; l++)
        same = !strcmp(pl[l].name, r->layers[l].name) &&
               !strcmp(pl[l].path, r->layers[l].path) && pl[l].read == r->layers[l].read;
    if (!same)
        return fail(s, "%s: made from other input layers than %s (the parts of one job "
                    "read the same inputs)", st_part_path(p), s->opt->inputs[0]);
    return ST_OK;
}

static st_status push(run_state *s, st_feature *f)
{
    if (s->nfeatures == s->capfeatures) {
        size_t cap = s->capfeatures ? 2 * s->capfeatures : 1024;
        st_feature **a = st_realloc(s->features, cap * sizeof *a);
        uint8_t *sh = a ? st_realloc(s->shared, cap) : NULL;
        if (a)
            s->features = a;
        if (!sh)
            return ST_ERR_NOMEM;
        s->shared = sh;
        s->capfeatures = cap;
    }
    s->features[s->nfeatures++] = f;
    return ST_OK;
}

/* Features of part 'k'; s->shared[i] holds k + 1 for a shared feature of
** part k, 0 for an owned one (sorted out in settle()). Shared features
** read before (every part holds them) are dropped at once. */
static st_status read_features(run_state *s, st_part *p, size_t k)
{
    for (;;) {
        st_feature *f = NULL;
        int shared = 0;
        st_status rc = st_part_next_feature(p, s->strings, &f, &shared);
        if (rc != ST_OK || !f)
            return rc;
        if (shared && k > 0) {
            st_feature_free(f);
            continue;
        }
        if ((rc = push(s, f)) != ST_OK) {
            st_feature_free(f);
            return rc;
        }
        s->shared[s->nfeatures - 1] = (uint8_t)(shared ? 1 : 0);
    }
}

static int by_bid(const void *a, const void *b)
{
    const st_feature *x = *(st_feature *const *)a, *y = *(st_feature *const *)b;
    return x->bid < y->bid ? -1 : x->bid > y->bid;
}

/* Bid order, no building twice, every feature of every layer present. */
static st_status settle(run_state *s)
{
    if (s->nfeatures > 1)
        qsort(s->features, s->nfeatures, sizeof *s->features, by_bid);
    for (size_t i = 1; i < s->nfeatures; i++)
        if (s->features[i]->bid == s->features[i - 1]->bid)
            return fail(s, "building %llu is in two parts: their windows overlap (give each "
                        "window once; tiles of one zoom never overlap)",
                        (unsigned long long)s->features[i]->bid);
    uint64_t *count = st_calloc(s->res->nlayers + 1, sizeof *count);
    if (!count)
        return ST_ERR_NOMEM;
    for (size_t i = 0; i < s->nfeatures; i++)
        if (s->features[i]->layer < s->res->nlayers)
            count[s->features[i]->layer]++;
    st_status rc = ST_OK;
    for (size_t l = 0; rc == ST_OK && l < s->res->nlayers; l++)
        if (count[l] != s->res->layers[l].read)
            rc = fail(s, "the parts hold %llu of the %llu features of layer '%s': a window is "
                      "missing (run every window of the layer, then merge all the parts)",
                      (unsigned long long)count[l], (unsigned long long)s->res->layers[l].read,
                      s->res->layers[l].name);
    st_free(count);
    s->nread = s->nfeatures;
    return rc;
}

/* The bids of the shared features (every part holds them), sorted: taken
** from part 0, whose copies (and findings) are the ones kept. */
typedef struct shared_set {
    uint64_t *bids;
    size_t n;
} shared_set;

static int by_u64(const void *a, const void *b)
{
    uint64_t x = *(const uint64_t *)a, y = *(const uint64_t *)b;
    return x < y ? -1 : x > y;
}

static st_status note_shared(run_state *s, shared_set *sh)
{
    size_t n = 0;
    for (size_t i = 0; i < s->nfeatures; i++)
        n += s->shared[i];
    sh->bids = st_malloc((n ? n : 1) * sizeof *sh->bids);
    if (!sh->bids)
        return ST_ERR_NOMEM;
    for (size_t i = 0; i < s->nfeatures; i++)
        if (s->shared[i])
            sh->bids[sh->n++] = s->features[i]->bid;
    qsort(sh->bids, sh->n, sizeof *sh->bids, by_u64);
    return ST_OK;
}

static int is_shared(const shared_set *sh, uint64_t bid)
{
    return sh->n && bsearch(&bid, sh->bids, sh->n, sizeof *sh->bids, by_u64) != NULL;
}

/* Findings of part k; those about shared features only from part 0. */
static st_status read_findings(run_state *s, st_part *p, size_t k, const shared_set *sh)
{
    st_findings part;
    st_findings_init(&part);
    st_status rc = st_part_read_findings(p, s->strings, &part);
    if (rc == ST_OK && k > 0) {
        size_t w = 0;
        for (size_t i = 0; i < part.count; i++) {
            if (is_shared(sh, part.items[i].bid))
                st_free(part.items[i].message);
            else
                part.items[w++] = part.items[i];
        }
        part.count = w;
    }
    if (rc == ST_OK)
        rc = st_findings_move(&s->findings, &part);
    st_findings_free(&part);
    return rc;
}

static st_status add_unmapped(void *ud, const char *field, const char *value, uint64_t n)
{
    return st_unmapped_add(ud, field, value, n);
}

/* Every part learnt the same of the input layers (count, field types,
** extent: st_run_layer_facts_digest), whether it read them whole or took
** a facts file: else the parts were made from other inputs or facts. */
static st_status same_layer_facts(run_state *s, const st_part *p, size_t k, char first[72])
{
    const char *v = st_part_info(p, "layer_facts");
    v = v ? v : "";
    if (k == 0) {
        snprintf(first, 72, "%s", v);
        return ST_OK;
    }
    if (strcmp(first, v) == 0)
        return ST_OK;
    return fail(s, "%s: its input layers differ from those of %s (count, field types or "
                "extent; layer facts %s, not %s): the parts were made from other inputs or "
                "other facts files", st_part_path(p), s->opt->inputs[0], *v ? v : "none",
                *first ? first : "none");
}

static st_status read_part(run_state *s, size_t k, const run_context *c, shared_set *sh,
                           char facts[72])
{
    st_part *p = NULL;
    st_status rc = st_part_open(s->opt->inputs[k], s->diags, &p);
    if (rc == ST_OK)
        rc = same_context(s, p, c);
    if (rc == ST_OK)
        rc = same_layer_facts(s, p, k, facts);
    if (rc == ST_OK)
        rc = take_layers(s, p, k == 0);
    if (rc == ST_OK)
        rc = read_features(s, p, k);
    if (rc == ST_OK && k == 0)
        rc = note_shared(s, sh);
    if (rc == ST_OK)
        rc = read_findings(s, p, k, sh);
    uint64_t dropped = 0;
    if (rc == ST_OK && s->unmapped)
        rc = st_part_read_unmapped(p, add_unmapped, s->unmapped, &dropped);
    st_part_close(p);
    st_run_progress(s, "read", (long long)k + 1, (long long)s->opt->ninputs);
    return rc;
}

st_status st_stage_read_parts(run_state *s)
{
    run_context c;
    st_status rc = st_run_context_make(s, &c);
    if (rc != ST_OK)
        return rc;
    shared_set sh = {NULL, 0};
    s->strings = st_strtab_new(0, 0);
    rc = s->strings ? ST_OK : ST_ERR_NOMEM;
    if (rc == ST_OK && s->rules)
        rc = st_unmapped_new(&s->unmapped);
    char facts[72] = "";
    for (size_t k = 0; rc == ST_OK && k < s->opt->ninputs; k++)
        rc = read_part(s, k, &c, &sh, facts);
    st_free(sh.bids);
    st_free(s->shared);   /* no use once read: features get sorted */
    s->shared = NULL;
    st_run_context_free(&c);
    if (rc == ST_OK)
        rc = settle(s);
    if (rc == ST_OK && s->rules)
        rc = st_run_keep_unmapped(s, s->unmapped);
    return rc;
}
