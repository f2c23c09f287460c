/*
** neighbours/neighbours.c -- the neighbour stage's configuration, its
** first step (who takes part, exact duplicates, the spatial index), the
** one-thread driver, and the messages shared by all steps.
**
** Input:   the run's features (borrowed, in any order) and an st_geos.
** Output:  exact duplicates set aside (status, duplicate_of, reason), a
**          dup.exact finding on each keeper, and the st_neighbours state
**          that scans read: the survivors in (layer, index) order and a
**          GEOS STRtree over their envelopes.
** Errors:  ST_ERR_NOMEM, ST_ERR_GEOS (the index), ST_ERR_LIMIT, ST_ERR_USAGE
**          (bad thresholds); each with one diagnostic.
** Limits:  at most UINT32_MAX - 1 features in one run.
** Memory:  kept between calls: 4 bytes a footprint (its position) plus the
**          STRtree's node for its envelope. No GEOS geometry is kept: the
**          index is built from throw-away rectangles.
*/
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "neighboursInt.h"

/* ---- configuration ------------------------------------------------------ */

void st_neighbours_config_init(st_neighbours_config *cfg)
{
    /* Reasons for each value: docs/neighbours.md. */
    cfg->near_iou = 0.9;
    cfg->overlap_share = 0.25;
    cfg->contained_share = 0.99;
    cfg->overlap_min_m2 = 1.0;
    cfg->exact_severity = ST_SEV_NOTE;
    cfg->near_severity = ST_SEV_WARNING;
    cfg->overlap_severity = ST_SEV_WARNING;
    cfg->contained_severity = ST_SEV_WARNING;
    cfg->max_candidates = 100000;
}

static int in_unit(double v)
{
    return v > 0.0 && v <= 1.0;   /* false for NaN too */
}

st_status st_neighbours_config_check(const st_neighbours_config *cfg, st_diags *diags)
{
    st_status rc = ST_OK;
    const st_loc none = ST_LOC_NONE;
    if (!in_unit(cfg->near_iou))
        rc = st_diags_add(diags, ST_SEV_ERROR, ST_ERR_USAGE, &none,
                          "near-duplicate IoU threshold %g is not in (0, 1]", cfg->near_iou);
    if (!in_unit(cfg->overlap_share))
        rc = st_diags_add(diags, ST_SEV_ERROR, ST_ERR_USAGE, &none,
                          "overlap share %g is not in (0, 1]", cfg->overlap_share);
    if (!in_unit(cfg->contained_share) || !(cfg->contained_share >= cfg->overlap_share))
        rc = st_diags_add(diags, ST_SEV_ERROR, ST_ERR_USAGE, &none,
                          "containment share %g is not in [overlap share, 1]",
                          cfg->contained_share);
    if (!(cfg->overlap_min_m2 >= 0.0 && cfg->overlap_min_m2 < INFINITY))
        rc = st_diags_add(diags, ST_SEV_ERROR, ST_ERR_USAGE, &none,
                          "overlap floor %g m2 is not a finite area >= 0",
                          cfg->overlap_min_m2);
    if (cfg->max_candidates < 1)
        rc = st_diags_add(diags, ST_SEV_ERROR, ST_ERR_USAGE, &none,
                          "max_candidates must be at least 1");
    return rc;
}

/* ---- messages -------------------------------------------------------------- */

/* Length of s clipped to at most max bytes without splitting a character. */
static int clip(const char *s, size_t max)
{
    size_t n = strlen(s);
    if (n > max)
        n = st_utf8_valid_prefix(s, max);
    return (int)n;
}

void st_nb_describe(const st_neighbours *nb, const st_feature *f, char *buf, size_t n)
{
    const char *layer = NULL;
    if (nb->in.layer_names && f->layer < nb->in.nlayers)
        layer = nb->in.layer_names[f->layer];
    int len = layer
        ? snprintf(buf, n, "building %llu (%.*s, feature %llu", (unsigned long long)f->bid,
                   clip(layer, 96), layer, (unsigned long long)f->index)
        : snprintf(buf, n, "building %llu (layer %u, feature %llu", (unsigned long long)f->bid,
                   (unsigned)f->layer, (unsigned long long)f->index);
    if (len < 0 || (size_t)len >= n)
        return;
    if (f->source_id && f->source_id[0])
        snprintf(buf + len, n - (size_t)len, ", id %.*s)", clip(f->source_id, 64),
                 f->source_id);
    else
        snprintf(buf + len, n - (size_t)len, ")");
}

int st_nb_prefer(const st_feature *a, uint32_t pos_a, const st_feature *b, uint32_t pos_b)
{
    uint32_t fa = st_feature_filled(a), fb = st_feature_filled(b);
    if (fa != fb)
        return fa > fb;
    return pos_a < pos_b;
}

void st_nb_why_kept(const st_feature *keeper, const st_feature *dup, char *buf, size_t n)
{
    uint32_t fk = st_feature_filled(keeper), fd = st_feature_filled(dup);
    if (fk > fd)
        snprintf(buf, n, "it has more filled attributes (%u against %u)", (unsigned)fk,
                 (unsigned)fd);
    else
        snprintf(buf, n, "it was read first (both have %u filled attribute%s)", (unsigned)fk,
                 fk == 1 ? "" : "s");
}

st_status st_nb_set_aside(const st_neighbours *nb, st_feature *dup, const st_feature *keeper,
                          const char *kind, const char *detail)
{
    char who[256], why[128];
    st_nb_describe(nb, keeper, who, sizeof who);
    st_nb_why_kept(keeper, dup, why, sizeof why);
    char *reason = st_strdup_printf("%s of %s%s; that one was kept because %s", kind, who,
                                    detail, why);
    if (!reason)
        return ST_ERR_NOMEM;
    st_free(dup->reason);
    dup->reason = reason;
    dup->status = ST_STATUS_DUPLICATE;
    dup->duplicate_of = keeper->bid;
    return ST_OK;
}

static st_status nomem(st_diags *diags, const char *where)
{
    const st_loc none = ST_LOC_NONE;
    return st_diags_add(diags, ST_SEV_ERROR, ST_ERR_NOMEM, &none,
                        "neighbour stage: out of memory %s", where);
}

/* ---- who takes part -------------------------------------------------------- */

static int takes_part(const st_feature *f)
{
    if (!f || (f->status != ST_STATUS_OK && f->status != ST_STATUS_REPAIRED))
        return 0;
    if (f->geom.type != ST_GEOM_POLYGON && f->geom.type != ST_GEOM_MULTIPOLYGON &&
        f->geom.type != ST_GEOM_COLLECTION)
        return 0;
    return f->geom.nparts > 0 && !st_geom_is_empty(&f->geom);
}

typedef struct order_key {
    uint64_t index;
    uint32_t layer;
    uint32_t pos;    /* position in in.features */
} order_key;

static int order_key_cmp(const void *x, const void *y)
{
    const order_key *a = x, *b = y;
    if (a->layer != b->layer)
        return a->layer < b->layer ? -1 : 1;
    if (a->index != b->index)
        return a->index < b->index ? -1 : 1;
    return a->pos < b->pos ? -1 : a->pos > b->pos;
}

/* nb->items = positions of the features that take part, (layer, index) order. */
static st_status select_features(st_neighbours *nb)
{
    size_t n = 0;
    for (size_t i = 0; i < nb->in.count; i++)
        n += takes_part(nb->in.features[i]);
    order_key *keys = st_malloc(n * sizeof *keys);
    nb->items = st_malloc(n * sizeof *nb->items);
    if (!keys || !nb->items) {
        st_free(keys);
        return ST_ERR_NOMEM;
    }
    size_t k = 0;
    for (size_t i = 0; i < nb->in.count; i++) {
        const st_feature *f = nb->in.features[i];
        if (takes_part(f))
            keys[k++] = (order_key){f->index, f->layer, (uint32_t)i};
    }
    qsort(keys, n, sizeof *keys, order_key_cmp);
    for (size_t i = 0; i < n; i++)
        nb->items[i] = keys[i].pos;
    nb->count = (uint32_t)n;
    st_free(keys);
    return ST_OK;
}

static st_feature *item(const st_neighbours *nb, uint32_t pos)
{
    return nb->in.features[nb->items[pos]];
}

/* ---- exact duplicates ------------------------------------------------------ */

typedef struct hash_key {
    uint64_t hash;   /* within a run of equal hashes: reused as class tag */
    uint32_t pos;    /* position in nb->items */
} hash_key;

static int hash_key_cmp(const void *x, const void *y)
{
    const hash_key *a = x, *b = y;
    if (a->hash != b->hash)
        return a->hash < b->hash ? -1 : 1;
    return a->pos < b->pos ? -1 : a->pos > b->pos;
}

/* A point inside f for its finding; NAN, NAN when GEOS cannot say.
** ST_ERR_NOMEM when building the geometry ran out of memory. */
static st_status inside_point(st_geos *gx, const st_feature *f, double *x, double *y)
{
    *x = *y = NAN;
    char err[128] = "";
    GEOSGeometry *g = st_geom_to_geos(gx, &f->geom, err, sizeof err);
    if (!g)
        return gx->last_status == ST_ERR_NOMEM ? ST_ERR_NOMEM : ST_OK;
    GEOSGeometry *p = GEOSPointOnSurface_r(gx->h, g);
    if (p && GEOSisEmpty_r(gx->h, p) == 0) {
        GEOSGeomGetX_r(gx->h, p, x);
        GEOSGeomGetY_r(gx->h, p, y);
    }
    if (p)
        GEOSGeom_destroy_r(gx->h, p);
    GEOSGeom_destroy_r(gx->h, g);
    return ST_OK;
}

/* Set aside all members of class 'tag' in run m[0..k) but the keeper. */
static st_status settle_class(st_neighbours *nb, hash_key *m, size_t k, uint64_t tag,
                              st_findings *findings)
{
    size_t best = SIZE_MAX;
    for (size_t j = 0; j < k; j++)
        if (m[j].hash == tag && (best == SIZE_MAX ||
                                 st_nb_prefer(item(nb, m[j].pos), m[j].pos,
                                              item(nb, m[best].pos), m[best].pos)))
            best = j;
    const st_feature *keeper = item(nb, m[best].pos);
    double x, y;
    st_status rc = inside_point(nb->gx, keeper, &x, &y);
    for (size_t j = 0; rc == ST_OK && j < k; j++) {
        if (m[j].hash != tag || j == best)
            continue;
        st_feature *dup = item(nb, m[j].pos);
        char who[256], why[128];
        st_nb_describe(nb, dup, who, sizeof who);
        st_nb_why_kept(keeper, dup, why, sizeof why);
        rc = st_nb_set_aside(nb, dup, keeper, "exact duplicate", "");
        if (rc == ST_OK)
            rc = st_findings_add(findings, keeper->bid, ST_CODE_DUP_EXACT,
                                 nb->cfg.exact_severity, x, y,
                                 "exact duplicate %s set aside; this one was kept because %s",
                                 who, why);
    }
    return rc;
}

/*
** Members of one run of equal hashes, m[0..k) in index order. Equal hashes
** need not mean equal outlines, so the run is split into classes of equal
** canonical forms: the first unsettled member's form is compared with the
** rest. The hash field is reused as class tag (UINT64_MAX = unsettled).
*/
static st_status settle_run(st_neighbours *nb, hash_key *m, size_t k, st_nb_canon *ca,
                            st_nb_canon *cb, st_findings *findings)
{
    for (size_t j = 0; j < k; j++)
        m[j].hash = UINT64_MAX;
    for (size_t i = 0; i < k; i++) {
        if (m[i].hash != UINT64_MAX)
            continue;
        m[i].hash = i;
        st_status rc = st_nb_canon_build(ca, &item(nb, m[i].pos)->geom);
        size_t members = 1;
        for (size_t j = i + 1; rc == ST_OK && j < k; j++) {
            if (m[j].hash != UINT64_MAX)
                continue;
            rc = st_nb_canon_build(cb, &item(nb, m[j].pos)->geom);
            if (rc == ST_OK && st_nb_canon_equal(ca, cb)) {
                m[j].hash = i;
                members++;
            }
        }
        if (rc == ST_OK && members > 1)
            rc = settle_class(nb, m, k, i, findings);
        if (rc != ST_OK)
            return rc;
    }
    return ST_OK;
}

static st_status set_aside_exact(st_neighbours *nb, st_findings *findings)
{
    if (nb->count < 2)
        return ST_OK;
    hash_key *keys = st_malloc((size_t)nb->count * sizeof *keys);
    st_nb_canon ca, cb;
    st_nb_canon_init(&ca);
    st_nb_canon_init(&cb);
    st_status rc = keys ? ST_OK : ST_ERR_NOMEM;
    for (uint32_t i = 0; rc == ST_OK && i < nb->count; i++) {
        rc = st_nb_canon_build(&ca, &item(nb, i)->geom);
        keys[i] = (hash_key){st_nb_canon_hash(&ca), i};
    }
    if (rc == ST_OK)
        qsort(keys, nb->count, sizeof *keys, hash_key_cmp);
    for (size_t s = 0, e; rc == ST_OK && s < nb->count; s = e) {
        for (e = s + 1; e < nb->count && keys[e].hash == keys[s].hash; e++)
            ;
        if (e - s > 1)
            rc = settle_run(nb, keys + s, e - s, &ca, &cb, findings);
    }
    st_nb_canon_free(&ca);
    st_nb_canon_free(&cb);
    st_free(keys);
    return rc;
}

/* Drop the features set aside from nb->items, keeping the order. */
static void keep_survivors(st_neighbours *nb)
{
    uint32_t k = 0;
    for (uint32_t i = 0; i < nb->count; i++)
        if (item(nb, i)->status != ST_STATUS_DUPLICATE)
            nb->items[k++] = nb->items[i];
    nb->count = k;
}

/* ---- spatial index ----------------------------------------------------------- */

static void ignore_item(void *item_, void *userdata)
{
    (void)item_;
    (void)userdata;
}

static st_status index_error(st_neighbours *nb, st_diags *diags, const char *what)
{
    const st_loc none = ST_LOC_NONE;
    return st_diags_add(diags, ST_SEV_ERROR, ST_ERR_GEOS, &none,
                        "neighbour stage: spatial index: %s: %s", what,
                        nb->gx->last_error[0] ? nb->gx->last_error : "GEOS failed");
}

/* STRtree over the survivors' envelopes; item = index position + 1 (GEOS
** gets no null item). The tree copies each envelope, so the rectangle that
** carried it is freed at once. */
static st_status build_index(st_neighbours *nb, st_diags *diags)
{
    GEOSContextHandle_t h = nb->gx->h;
    st_geos_clear_error(nb->gx);
    nb->tree = GEOSSTRtree_create_r(h, 10);
    if (!nb->tree)
        return index_error(nb, diags, "create");
    double bb[4];
    for (uint32_t i = 0; i < nb->count; i++) {
        st_geom_bbox(&item(nb, i)->geom, bb);
        GEOSGeometry *rect = GEOSGeom_createRectangle_r(h, bb[0], bb[1], bb[2], bb[3]);
        if (!rect)
            return index_error(nb, diags, "envelope");
        GEOSSTRtree_insert_r(h, nb->tree, rect, (void *)((uintptr_t)i + 1));
        GEOSGeom_destroy_r(h, rect);
        if (nb->gx->last_error[0])
            return index_error(nb, diags, "insert");
    }
    if (nb->count > 0) {
        /* The tree builds itself on its first query; do it now, in this
        ** thread, so concurrent scans only ever read it. */
        GEOSGeometry *rect = GEOSGeom_createRectangle_r(h, bb[0], bb[1], bb[2], bb[3]);
        if (!rect)
            return index_error(nb, diags, "envelope");
        GEOSSTRtree_query_r(h, nb->tree, rect, ignore_item, NULL);
        GEOSGeom_destroy_r(h, rect);
        if (nb->gx->last_error[0])
            return index_error(nb, diags, "build");
    }
    return ST_OK;
}

/* ---- the public steps -------------------------------------------------------- */

st_status st_neighbours_begin(const st_neighbours_config *cfg, const st_neighbours_input *in,
                              st_geos *gx, st_findings *findings, st_diags *diags,
                              st_neighbours **out)
{
    *out = NULL;
    st_status rc = st_neighbours_config_check(cfg, diags);
    if (rc != ST_OK)
        return rc;
    if (in->count > UINT32_MAX - 1) {
        const st_loc none = ST_LOC_NONE;
        return st_diags_add(diags, ST_SEV_ERROR, ST_ERR_LIMIT, &none,
                            "neighbour stage: %zu features, more than the limit of %lu",
                            in->count, (unsigned long)UINT32_MAX - 1);
    }
    st_neighbours *nb = st_calloc(1, sizeof *nb);
    if (!nb)
        return nomem(diags, "starting");
    nb->cfg = *cfg;
    nb->in = *in;
    nb->gx = gx;
    geod_init(&nb->geod, 6378137.0, 1 / 298.257223563);   /* WGS 84 */
    rc = select_features(nb);
    if (rc == ST_OK)
        rc = set_aside_exact(nb, findings);
    if (rc == ST_OK) {
        keep_survivors(nb);
        rc = build_index(nb, diags);
    } else if (rc == ST_ERR_NOMEM) {
        nomem(diags, "finding exact duplicates");
    }
    if (rc != ST_OK) {
        st_neighbours_free(nb);
        return rc;
    }
    *out = nb;
    return ST_OK;
}

size_t st_neighbours_count(const st_neighbours *nb)
{
    return nb->count;
}

void st_neighbours_free(st_neighbours *nb)
{
    if (!nb)
        return;
    if (nb->tree)
        GEOSSTRtree_destroy_r(nb->gx->h, nb->tree);
    st_free(nb->items);
    st_free(nb);
}

st_status st_neighbours_run(const st_neighbours_config *cfg, const st_neighbours_input *in,
                            st_geos *gx, st_findings *findings, st_diags *diags)
{
    st_neighbours *nb = NULL;
    st_neighbours_pairs *pairs = NULL;
    st_status rc = st_neighbours_begin(cfg, in, gx, findings, diags, &nb);
    if (rc == ST_OK)
        rc = st_neighbours_scan(nb, gx, 0, st_neighbours_count(nb), diags, &pairs);
    if (rc == ST_OK)
        rc = st_neighbours_finish(nb, &pairs, 1, findings, diags);
    st_neighbours_pairs_free(pairs);
    st_neighbours_free(nb);
    return rc;
}
