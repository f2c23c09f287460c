/*
** neighbours/nb_scan.c -- the pair scan: each footprint against the later
** footprints (in index order) whose envelopes meet its own.
**
** Input:   the st_neighbours state (read only), a range of index positions
**          and the calling thread's st_geos.
** Output:  st_neighbours_pairs holding only the pairs that matter: near-
**          duplicates (IoU >= near_iou) and overlaps (share of the smaller
**          footprint >= overlap_share and intersection >= overlap_min_m2),
**          the latter marked contained when share >= contained_share.
** Why so: one STRtree query per footprint and only later partners, so each
**          pair is looked at once and the work is near-linear. A footprint's
**          GEOS geometry lives only while its own query is served (prepared
**          for the intersects tests), a partner's only for its one pair.
** Errors:  ST_ERR_NOMEM; ST_ERR_GEOS when the index query fails. A footprint
**          or pair GEOS cannot handle is skipped with a warning.
** Limits:  a footprint whose envelope meets more than cfg.max_candidates
**          later envelopes is not compared (warning, ST_ERR_LIMIT code).
*/
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "neighboursInt.h"

typedef struct scan {
    const st_neighbours *nb;
    st_geos *gx;
    st_diags *diags;
    uint32_t current;          /* index position being served */
    uint32_t *cand;            /* later partners found by the query */
    size_t ncand, cap;
    int nomem, too_many;       /* set by the query callback */
    st_neighbours_pairs *out;
} scan;

static const st_feature *item(const st_neighbours *nb, uint32_t pos)
{
    return nb->in.features[nb->items[pos]];
}

void st_neighbours_pairs_free(st_neighbours_pairs *pairs)
{
    if (!pairs)
        return;
    st_free(pairs->items);
    st_free(pairs);
}

/* STRtree callback: keep partners after the current footprint. */
static void collect(void *found, void *userdata)
{
    scan *s = userdata;
    uint32_t pos = (uint32_t)((uintptr_t)found - 1);
    if (pos <= s->current || s->nomem || s->too_many)
        return;
    if (s->ncand >= s->nb->cfg.max_candidates) {
        s->too_many = 1;
        return;
    }
    if (s->ncand == s->cap) {
        size_t cap = s->cap ? 2 * s->cap : 64;
        uint32_t *p = st_realloc(s->cand, cap * sizeof *p);
        if (!p) {
            s->nomem = 1;
            return;
        }
        s->cand = p;
        s->cap = cap;
    }
    s->cand[s->ncand++] = pos;
}

static int u32_cmp(const void *x, const void *y)
{
    uint32_t a = *(const uint32_t *)x, b = *(const uint32_t *)y;
    return a < b ? -1 : a > b;
}

static st_loc where(const scan *s, const st_feature *f)
{
    const char *layer = NULL;
    if (s->nb->in.layer_names && f->layer < s->nb->in.nlayers)
        layer = s->nb->in.layer_names[f->layer];
    return ST_LOC_FEATURE(layer, (long long)f->index);
}

/* Warn that a footprint or pair was skipped; the scan goes on. */
static st_status skipped(scan *s, const st_feature *f, st_status code, const char *what)
{
    char who[256];
    st_nb_describe(s->nb, f, who, sizeof who);
    st_loc loc = where(s, f);
    st_diags_add(s->diags, ST_SEV_WARNING, code, &loc, "neighbour stage: %s: %s%s%s", who,
                 what, s->gx->last_error[0] ? ": " : "", s->gx->last_error);
    return ST_OK;
}

/* GEOS geometry of footprint pos, or NULL: *rc says whether to go on. */
static GEOSGeometry *to_geos(scan *s, uint32_t pos, st_status *rc)
{
    char err[256] = "";
    GEOSGeometry *g = st_geom_to_geos(s->gx, &item(s->nb, pos)->geom, err, sizeof err);
    *rc = ST_OK;
    if (g)
        return g;
    if (s->gx->last_status == ST_ERR_NOMEM)
        *rc = ST_ERR_NOMEM;
    else
        *rc = skipped(s, item(s->nb, pos), ST_ERR_GEOS, "geometry not usable");
    return NULL;
}

/* ---- geodesic area ------------------------------------------------------- */

static double ring_m2(const scan *s, const GEOSGeometry *ring)
{
    GEOSContextHandle_t h = s->gx->h;
    const GEOSCoordSequence *seq = GEOSGeom_getCoordSeq_r(h, ring);
    unsigned int n = 0;
    if (!seq || !GEOSCoordSeq_getSize_r(h, seq, &n) || n < 4)
        return 0.0;
    struct geod_polygon p;
    geod_polygon_init(&p, 0);
    for (unsigned int i = 0; i + 1 < n; i++) {   /* the closing vertex repeats */
        double x, y;
        GEOSCoordSeq_getXY_r(h, seq, i, &x, &y);
        geod_polygon_addpoint(&s->nb->geod, &p, y, x);
    }
    double area = 0.0;
    geod_polygon_compute(&s->nb->geod, &p, 0, 1, &area, NULL);
    return fabs(area);
}

/*
** Geodesic area in m² of the polygonal parts of g (an intersection: may be
** a collection with lines and points, which have no area). Geodesic rather
** than a cos(latitude) scale: it is exact on the WGS 84 ellipsoid and costs
** little, since only intersections that already pass the share test get here.
*/
static double polygonal_m2(const scan *s, const GEOSGeometry *g)
{
    GEOSContextHandle_t h = s->gx->h;
    int type = GEOSGeomTypeId_r(h, g);
    if (type == GEOS_POLYGON) {
        double a = ring_m2(s, GEOSGetExteriorRing_r(h, g));
        int nh = GEOSGetNumInteriorRings_r(h, g);
        for (int i = 0; i < nh; i++)
            a -= ring_m2(s, GEOSGetInteriorRingN_r(h, g, i));
        return a > 0.0 ? a : 0.0;
    }
    if (type != GEOS_MULTIPOLYGON && type != GEOS_GEOMETRYCOLLECTION)
        return 0.0;
    double a = 0.0;
    int n = GEOSGetNumGeometries_r(h, g);
    for (int i = 0; i < n; i++)
        a += polygonal_m2(s, GEOSGetGeometryN_r(h, g, i));
    return a;
}

/* ---- one pair --------------------------------------------------------------- */

static st_status add_pair(st_neighbours_pairs *out, const nb_pair *p)
{
    if (out->count == out->cap) {
        size_t cap = out->cap ? 2 * out->cap : 32;
        nb_pair *items = st_realloc(out->items, cap * sizeof *items);
        if (!items)
            return ST_ERR_NOMEM;
        out->items = items;
        out->cap = cap;
    }
    out->items[out->count++] = *p;
    return ST_OK;
}

/* Classify the pair from its intersection; kind 0 when it does not matter. */
static void classify(const scan *s, const GEOSGeometry *inter, double ai, double area_a,
                     double area_b, nb_pair *p)
{
    const st_neighbours_config *cfg = &s->nb->cfg;
    /* Ratios of areas in degrees² are fine: both footprints lie at the same
    ** latitude, so the local scale (cos(latitude) x (111 320 m)² a square
    ** degree) is the same for all three areas and cancels out. Only the
    ** absolute floor needs square metres. */
    double smaller = area_a < area_b ? area_a : area_b;
    p->kind = 0;
    if (!(smaller > 0.0))
        return;
    p->share = ai / smaller;
    p->iou = ai / (area_a + area_b - ai);
    p->m2 = 0.0;
    if (p->iou >= cfg->near_iou) {
        p->kind = NB_NEAR;
    } else if (p->share >= cfg->overlap_share) {
        p->m2 = polygonal_m2(s, inter);
        if (p->m2 >= cfg->overlap_min_m2)
            p->kind = p->share >= cfg->contained_share ? NB_CONTAINED : NB_PARTIAL;
    }
    p->smaller = area_a <= area_b ? p->a : p->b;
}

static st_status compare_pair(scan *s, uint32_t a, const GEOSGeometry *ga,
                              const GEOSPreparedGeometry *prep, double area_a, uint32_t b)
{
    GEOSContextHandle_t h = s->gx->h;
    st_status rc;
    GEOSGeometry *gb = to_geos(s, b, &rc);
    if (!gb)
        return rc;
    GEOSGeometry *inter = NULL, *pt = NULL;
    double area_b = 0.0, ai = 0.0;
    char meets = GEOSPreparedIntersects_r(h, prep, gb);
    if (meets == 1) {
        inter = GEOSIntersection_r(h, ga, gb);
        if (!inter || !GEOSArea_r(h, inter, &ai) || !GEOSArea_r(h, gb, &area_b))
            meets = 2;
    }
    if (meets == 2) {
        rc = skipped(s, item(s->nb, a), ST_ERR_GEOS, "intersection with a neighbour failed");
    } else if (meets == 1) {
        nb_pair p = {.a = a, .b = b};
        classify(s, inter, ai, area_a, area_b, &p);
        if (p.kind) {
            p.x = p.y = NAN;
            if ((pt = GEOSPointOnSurface_r(h, inter)) != NULL && GEOSisEmpty_r(h, pt) == 0) {
                GEOSGeomGetX_r(h, pt, &p.x);
                GEOSGeomGetY_r(h, pt, &p.y);
            }
            rc = add_pair(s->out, &p);
        }
    }
    if (pt)
        GEOSGeom_destroy_r(h, pt);
    if (inter)
        GEOSGeom_destroy_r(h, inter);
    GEOSGeom_destroy_r(h, gb);
    return rc;
}

/* ---- the cheap test before GEOS ------------------------------------------ */

/* Planar area of g in square degrees: shells less holes (valid polygons). */
static double planar_area(const st_geom *g)
{
    double a = 0.0;
    for (uint32_t p = 0; p < g->nparts; p++)
        for (uint32_t r = g->part_ring[p]; r < g->part_ring[p + 1]; r++) {
            double ring = fabs(st_geom_ring_signed_area(g, r));
            a += r == g->part_ring[p] ? ring : -ring;
        }
    return a;
}

/*
** 1 when the pair cannot matter, judged from envelopes alone: the
** intersection is no larger than the overlap of the two envelopes, and
** IoU <= share, so when that overlap is below min(overlap_share, near_iou)
** of the smaller footprint neither test can pass. This skips the GEOS work
** for most neighbours (terraced houses' envelopes meet on a line only).
** The margin keeps the test conservative against the few ulps by which
** this shoelace and GEOS's area may differ.
*/
static int cannot_matter(const scan *s, const double ba[4], double area_a, uint32_t b)
{
    const st_geom *g = &item(s->nb, b)->geom;
    double bb[4];
    st_geom_bbox(g, bb);
    double w = fmin(ba[2], bb[2]) - fmax(ba[0], bb[0]);
    double h = fmin(ba[3], bb[3]) - fmax(ba[1], bb[1]);
    double boxes = w > 0.0 && h > 0.0 ? w * h : 0.0;
    double smaller = fmin(area_a, planar_area(g));
    const st_neighbours_config *cfg = &s->nb->cfg;
    double need = fmin(cfg->overlap_share, cfg->near_iou) * smaller;
    return boxes < need * (1.0 - 1e-9);
}

/* ---- one footprint ---------------------------------------------------------- */

static st_status query(scan *s, uint32_t a)
{
    double bb[4];
    st_geom_bbox(&item(s->nb, a)->geom, bb);
    GEOSContextHandle_t h = s->gx->h;
    st_geos_clear_error(s->gx);
    GEOSGeometry *rect = GEOSGeom_createRectangle_r(h, bb[0], bb[1], bb[2], bb[3]);
    if (!rect)
        return ST_ERR_GEOS;
    s->current = a;
    s->ncand = 0;
    s->nomem = s->too_many = 0;
    GEOSSTRtree_query_r(h, s->nb->tree, rect, collect, s);
    GEOSGeom_destroy_r(h, rect);
    if (s->nomem)
        return ST_ERR_NOMEM;
    return s->gx->last_error[0] ? ST_ERR_GEOS : ST_OK;
}

static st_status scan_one(scan *s, uint32_t a)
{
    st_status rc = query(s, a);
    if (rc == ST_ERR_GEOS) {
        st_loc loc = where(s, item(s->nb, a));
        return st_diags_add(s->diags, ST_SEV_ERROR, ST_ERR_GEOS, &loc,
                            "neighbour stage: spatial index query failed: %s",
                            s->gx->last_error[0] ? s->gx->last_error : "GEOS failed");
    }
    if (rc != ST_OK || s->ncand == 0)
        return rc;
    if (s->too_many) {
        char what[96];
        snprintf(what, sizeof what, "not compared: its envelope meets more than %lu others",
                 (unsigned long)s->nb->cfg.max_candidates);
        return skipped(s, item(s->nb, a), ST_ERR_LIMIT, what);
    }
    /* The tree's order is its own business; ours is the index order. */
    qsort(s->cand, s->ncand, sizeof *s->cand, u32_cmp);
    GEOSContextHandle_t h = s->gx->h;
    GEOSGeometry *ga = to_geos(s, a, &rc);
    if (!ga)
        return rc;
    double area_a = 0.0;
    const GEOSPreparedGeometry *prep = NULL;
    if (!GEOSArea_r(h, ga, &area_a) || !(prep = GEOSPrepare_r(h, ga)))
        rc = skipped(s, item(s->nb, a), ST_ERR_GEOS, "area or preparation failed");
    double ba[4];
    st_geom_bbox(&item(s->nb, a)->geom, ba);
    for (size_t i = 0; prep && rc == ST_OK && i < s->ncand; i++)
        if (!cannot_matter(s, ba, area_a, s->cand[i]))
            rc = compare_pair(s, a, ga, prep, area_a, s->cand[i]);
    if (prep)
        GEOSPreparedGeom_destroy_r(h, prep);
    GEOSGeom_destroy_r(h, ga);
    return rc;
}

st_status st_neighbours_scan(const st_neighbours *nb, st_geos *gx, size_t begin, size_t end,
                             st_diags *diags, st_neighbours_pairs **out)
{
    *out = NULL;
    if (begin > end || end > nb->count) {
        const st_loc none = ST_LOC_NONE;
        return st_diags_add(diags, ST_SEV_ERROR, ST_ERR_USAGE, &none,
                            "neighbour stage: scan range [%zu, %zu) outside [0, %lu)", begin,
                            end, (unsigned long)nb->count);
    }
    scan s = {.nb = nb, .gx = gx, .diags = diags};
    s.out = st_calloc(1, sizeof *s.out);
    st_status rc = s.out ? ST_OK : ST_ERR_NOMEM;
    for (size_t a = begin; rc == ST_OK && a < end; a++)
        rc = scan_one(&s, (uint32_t)a);
    st_free(s.cand);
    if (rc != ST_OK) {
        if (rc == ST_ERR_NOMEM) {
            const st_loc none = ST_LOC_NONE;
            st_diags_add(diags, ST_SEV_ERROR, ST_ERR_NOMEM, &none,
                         "neighbour stage: out of memory comparing neighbours");
        }
        st_neighbours_pairs_free(s.out);
        return rc;
    }
    *out = s.out;
    return ST_OK;
}
