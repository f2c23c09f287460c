/*
** neighbours/nb_finish.c -- the last step: which near-duplicates are set
** aside, and the findings for near-duplicates, overlaps and containment.
**
** Input:   the pairs of all scans (borrowed), in any order.
** Output:  near-duplicates set aside (status, duplicate_of, reason with the
**          IoU) and findings, always in the same order for the same input:
**          dup.near in keeper order, then overlaps by pair (a, b).
** Rule:    near-duplicate pairs need not form clean groups (A ~ B and B ~ C
**          while A and C are further apart), so keepers are chosen greedily:
**          footprints in keeper order (most filled attributes, then first
**          read); each one not yet set aside keeps itself and sets aside
**          every near partner not yet set aside. So every building set aside
**          is a near-duplicate of its own keeper, with that pair's IoU in
**          its reason; a partner left over stays, and its pair with the
**          keeper is reported as an overlap if it is one.
**          Overlap and containment findings go on BOTH buildings, and only
**          when both are still kept.
** Errors:  ST_ERR_NOMEM.
*/
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "neighboursInt.h"

static st_feature *item(const st_neighbours *nb, uint32_t pos)
{
    return nb->in.features[nb->items[pos]];
}

static int set_aside(const st_neighbours *nb, uint32_t pos)
{
    return item(nb, pos)->status == ST_STATUS_DUPLICATE;
}

static int pair_cmp(const void *x, const void *y)
{
    const nb_pair *a = x, *b = y;
    if (a->a != b->a)
        return a->a < b->a ? -1 : 1;
    return a->b < b->b ? -1 : a->b > b->b;
}

/* One direction of a near-duplicate pair: from -> to, with its pair. */
typedef struct half_edge {
    uint32_t from, to;
    size_t pair;
} half_edge;

static int half_edge_cmp(const void *x, const void *y)
{
    const half_edge *a = x, *b = y;
    if (a->from != b->from)
        return a->from < b->from ? -1 : 1;
    return a->to < b->to ? -1 : a->to > b->to;
}

typedef struct rank {
    uint32_t filled, pos;
} rank;

/* Keeper order: more filled attributes first, then the first read. */
static int rank_cmp(const void *x, const void *y)
{
    const rank *a = x, *b = y;
    if (a->filled != b->filled)
        return a->filled > b->filled ? -1 : 1;
    return a->pos < b->pos ? -1 : a->pos > b->pos;
}

static st_status absorb(const st_neighbours *nb, uint32_t keeper_pos, uint32_t dup_pos,
                        const nb_pair *p, st_findings *findings)
{
    st_feature *keeper = item(nb, keeper_pos), *dup = item(nb, dup_pos);
    char detail[64], who[256], why[128];
    snprintf(detail, sizeof detail, ": intersection over union %.3f", p->iou);
    st_nb_describe(nb, dup, who, sizeof who);
    st_nb_why_kept(keeper, dup, why, sizeof why);
    st_status rc = st_nb_set_aside(nb, dup, keeper, "near-duplicate", detail);
    if (rc == ST_OK)
        rc = st_findings_add(findings, keeper->bid, ST_CODE_DUP_NEAR, nb->cfg.near_severity,
                             p->x, p->y,
                             "near-duplicate %s set aside (intersection over union %.3f); "
                             "this one was kept because %s",
                             who, p->iou, why);
    return rc;
}

/* Near-duplicate keepers, greedily in keeper order (file comment). */
static st_status settle_near(const st_neighbours *nb, const nb_pair *pairs, size_t n,
                             st_findings *findings)
{
    size_t nnear = 0;
    for (size_t i = 0; i < n; i++)
        nnear += pairs[i].kind == NB_NEAR;
    if (nnear == 0)
        return ST_OK;
    half_edge *edges = st_malloc(2 * nnear * sizeof *edges);
    rank *ranks = st_malloc(2 * nnear * sizeof *ranks);
    st_status rc = edges && ranks ? ST_OK : ST_ERR_NOMEM;
    size_t ne = 0, nr = 0;
    for (size_t i = 0; rc == ST_OK && i < n; i++)
        if (pairs[i].kind == NB_NEAR) {
            edges[ne++] = (half_edge){pairs[i].a, pairs[i].b, i};
            edges[ne++] = (half_edge){pairs[i].b, pairs[i].a, i};
        }
    if (rc == ST_OK) {
        qsort(edges, ne, sizeof *edges, half_edge_cmp);
        for (size_t i = 0; i < ne; i++)
            if (i == 0 || edges[i].from != edges[i - 1].from)
                ranks[nr++] = (rank){st_feature_filled(item(nb, edges[i].from)),
                                     edges[i].from};
        qsort(ranks, nr, sizeof *ranks, rank_cmp);
    }
    for (size_t r = 0; rc == ST_OK && r < nr; r++) {
        uint32_t keeper = ranks[r].pos;
        if (set_aside(nb, keeper))
            continue;
        /* Its partners: the run of edges from 'keeper' (binary search). */
        size_t lo = 0, hi = ne;
        while (lo < hi) {
            size_t mid = lo + (hi - lo) / 2;
            if (edges[mid].from < keeper)
                lo = mid + 1;
            else
                hi = mid;
        }
        for (size_t e = lo; rc == ST_OK && e < ne && edges[e].from == keeper; e++)
            if (!set_aside(nb, edges[e].to))
                rc = absorb(nb, keeper, edges[e].to, &pairs[edges[e].pair], findings);
    }
    st_free(edges);
    st_free(ranks);
    return rc;
}

/* Findings on both buildings of an overlap or containment. */
static st_status report_overlap(const st_neighbours *nb, const nb_pair *p,
                                st_findings *findings)
{
    const st_feature *fa = item(nb, p->a), *fb = item(nb, p->b);
    char wa[256], wb[256];
    st_nb_describe(nb, fa, wa, sizeof wa);
    st_nb_describe(nb, fb, wb, sizeof wb);
    const st_neighbours_config *cfg = &nb->cfg;
    st_status rc;
    if (p->kind == NB_PARTIAL) {
        rc = st_findings_add(findings, fa->bid, ST_CODE_OVERLAP_PARTIAL, cfg->overlap_severity,
                             p->x, p->y,
                             "overlaps %s: %.1f m2 in common, %.1f%% of the smaller footprint",
                             wb, p->m2, 100.0 * p->share);
        if (rc == ST_OK)
            rc = st_findings_add(findings, fb->bid, ST_CODE_OVERLAP_PARTIAL,
                                 cfg->overlap_severity, p->x, p->y,
                                 "overlaps %s: %.1f m2 in common, %.1f%% of the smaller "
                                 "footprint",
                                 wa, p->m2, 100.0 * p->share);
        return rc;
    }
    int a_inner = p->smaller == p->a;
    const st_feature *inner = a_inner ? fa : fb, *outer = a_inner ? fb : fa;
    const char *w_inner = a_inner ? wa : wb, *w_outer = a_inner ? wb : wa;
    rc = st_findings_add(findings, inner->bid, ST_CODE_OVERLAP_CONTAINED,
                         cfg->contained_severity, p->x, p->y,
                         "lies within %s: %.1f%% of this footprint (%.1f m2) is inside it",
                         w_outer, 100.0 * p->share, p->m2);
    if (rc == ST_OK)
        rc = st_findings_add(findings, outer->bid, ST_CODE_OVERLAP_CONTAINED,
                             cfg->contained_severity, p->x, p->y,
                             "contains %s: %.1f%% of that footprint (%.1f m2) is inside this "
                             "one",
                             w_inner, 100.0 * p->share, p->m2);
    return rc;
}

st_status st_neighbours_finish(st_neighbours *nb, st_neighbours_pairs *const *parts,
                               size_t nparts, st_findings *findings, st_diags *diags)
{
    size_t n = 0;
    for (size_t i = 0; i < nparts; i++)
        n += parts[i] ? parts[i]->count : 0;
    nb_pair *all = st_malloc(n * sizeof *all);
    st_status rc = all ? ST_OK : ST_ERR_NOMEM;
    if (rc == ST_OK) {
        size_t k = 0;
        for (size_t i = 0; i < nparts; i++)
            if (parts[i] && parts[i]->count) {
                memcpy(all + k, parts[i]->items, parts[i]->count * sizeof *all);
                k += parts[i]->count;
            }
        qsort(all, n, sizeof *all, pair_cmp);
        rc = settle_near(nb, all, n, findings);
    }
    for (size_t i = 0; rc == ST_OK && i < n; i++)
        if ((all[i].kind == NB_PARTIAL || all[i].kind == NB_CONTAINED) &&
            !set_aside(nb, all[i].a) && !set_aside(nb, all[i].b))
            rc = report_overlap(nb, &all[i], findings);
    st_free(all);
    if (rc == ST_ERR_NOMEM) {
        const st_loc none = ST_LOC_NONE;
        st_diags_add(diags, ST_SEV_ERROR, ST_ERR_NOMEM, &none,
                     "neighbour stage: out of memory deciding duplicates and overlaps");
    }
    return rc;
}

st_status st_neighbours_links(const st_neighbours *nb, st_neighbours_pairs *const *parts,
                              size_t nparts, st_neighbours_link **out, size_t *n)
{
    size_t total = 0;
    for (size_t i = 0; i < nparts; i++)
        total += parts[i] ? parts[i]->count : 0;
    *out = NULL;
    *n = 0;
    if (total == 0)
        return ST_OK;
    st_neighbours_link *l = st_malloc(total * sizeof *l);
    if (!l)
        return ST_ERR_NOMEM;
    size_t k = 0;
    for (size_t i = 0; i < nparts; i++)
        for (size_t j = 0; parts[i] && j < parts[i]->count; j++) {
            const nb_pair *p = &parts[i]->items[j];
            l[k++] = (st_neighbours_link){nb->items[p->a], nb->items[p->b], p->kind == NB_NEAR};
        }
    *out = l;
    *n = k;
    return ST_OK;
}
