/*
** place/place.c -- placing buildings in districts: a point on surface per
** footprint, an STRtree of district envelopes, prepared polygons, and the
** border rule (lowest district index among those that cover the point).
**
** Input:   an st_districts set (read-only, shared), features after the
**          geometry stages.
** Output:  f->district on every feature; `place.outside` findings for kept
**          buildings in no district, in the order of the features.
** Errors:  ST_ERR_GEOS when GEOS raises an exception while building the
**          index or testing a point (a diagnostic quotes GEOS);
**          ST_ERR_NOMEM. A footprint GEOS cannot take a point on surface of
**          is not an error: the centre of its bounding box is used.
** Threads: each thread builds its own GEOS context and placer over the same
**          st_districts; results and findings are merged in input order, so
**          any number of threads gives the same output.
*/
#include <pthread.h>
#include <stdio.h>
#include <string.h>

#include "placeInt.h"
#include "stocktake/footprint.h"

struct st_placer {
    const st_districts *d;
    st_geos *gx;
    GEOSGeometry **geoms;               /* per district, NULL when empty */
    const GEOSPreparedGeometry **prep;  /* per district, NULL when empty */
    uint32_t *ids;                      /* tree items point into this */
    GEOSSTRtree *tree;
    uint32_t *cand;                     /* candidates of the current query */
    size_t ncand, capcand;
    int oom;                            /* the query callback ran out of memory */
};

void st_placer_free(st_placer *p)
{
    if (!p)
        return;
    GEOSContextHandle_t h = p->gx->h;
    if (p->tree)
        GEOSSTRtree_destroy_r(h, p->tree);
    for (size_t i = 0; i < p->d->n; i++) {
        if (p->prep && p->prep[i])
            GEOSPreparedGeom_destroy_r(h, p->prep[i]);
        if (p->geoms && p->geoms[i])
            GEOSGeom_destroy_r(h, p->geoms[i]);
    }
    st_free(p->prep);
    st_free(p->geoms);
    st_free(p->ids);
    st_free(p->cand);
    st_free(p);
}

static st_status geos_error(st_placer *p, st_diags *diags, const char *what, const char *key)
{
    return st_diags_add(diags, ST_SEV_ERROR, ST_ERR_GEOS, NULL, "%s%s%s: %s", what,
                        key ? " of district " : "", key ? key : "",
                        p->gx->last_error[0] ? p->gx->last_error : "GEOS failed");
}

st_status st_placer_new(const st_districts *d, st_geos *gx, st_diags *diags, st_placer **out)
{
    *out = NULL;
    st_placer *p = st_calloc(1, sizeof *p);
    if (!p)
        return ST_ERR_NOMEM;
    p->d = d;
    p->gx = gx;
    size_t n = d->n ? d->n : 1;
    p->geoms = st_calloc(n, sizeof *p->geoms);
    p->prep = st_calloc(n, sizeof *p->prep);
    p->ids = st_calloc(n, sizeof *p->ids);
    if (!p->geoms || !p->prep || !p->ids) {
        st_placer_free(p);
        return ST_ERR_NOMEM;
    }
    GEOSContextHandle_t h = gx->h;
    st_geos_clear_error(gx);
    p->tree = GEOSSTRtree_create_r(h, 10);
    st_status rc = p->tree ? ST_OK : geos_error(p, diags, "cannot create the district index", NULL);
    for (size_t i = 0; rc == ST_OK && i < d->n; i++) {
        const st_district *di = &d->items[i];
        p->ids[i] = (uint32_t)i;
        if (!di->geom.nparts)
            continue;
        char err[256] = "";
        p->geoms[i] = st_geom_to_geos(gx, &di->geom, err, sizeof err);
        if (!p->geoms[i]) {
            rc = st_diags_add(diags, ST_SEV_ERROR, ST_ERR_GEOS, NULL,
                              "cannot build the polygon of district %s: %s", di->key, err);
            break;
        }
        p->prep[i] = GEOSPrepare_r(h, p->geoms[i]);
        if (!p->prep[i])
            rc = geos_error(p, diags, "cannot prepare the polygon", di->key);
        else
            GEOSSTRtree_insert_r(h, p->tree, p->geoms[i], &p->ids[i]);
    }
    if (rc != ST_OK) {
        st_placer_free(p);
        return rc;
    }
    *out = p;
    return ST_OK;
}

static void collect(void *item, void *userdata)
{
    st_placer *p = userdata;
    if (p->ncand == p->capcand) {
        size_t cap = p->capcand ? 2 * p->capcand : 16;
        uint32_t *a = st_realloc(p->cand, cap * sizeof *a);
        if (!a) {
            p->oom = 1;
            return;
        }
        p->cand = a;
        p->capcand = cap;
    }
    p->cand[p->ncand++] = *(const uint32_t *)item;
}

st_status st_placer_point(st_placer *p, double x, double y, int32_t *district)
{
    *district = -1;
    GEOSContextHandle_t h = p->gx->h;
    st_geos_clear_error(p->gx);
    GEOSGeometry *pt = GEOSGeom_createPointFromXY_r(h, x, y);
    if (!pt)
        return ST_ERR_GEOS;
    p->ncand = 0;
    p->oom = 0;
    GEOSSTRtree_query_r(h, p->tree, pt, collect, p);
    st_status rc = p->oom ? ST_ERR_NOMEM : ST_OK;
    /* The border rule: ascending district index, the first that covers. */
    for (size_t i = 1; i < p->ncand; i++) {
        uint32_t v = p->cand[i];
        size_t j = i;
        for (; j > 0 && p->cand[j - 1] > v; j--)
            p->cand[j] = p->cand[j - 1];
        p->cand[j] = v;
    }
    for (size_t i = 0; rc == ST_OK && i < p->ncand; i++) {
        char c = GEOSPreparedCovers_r(h, p->prep[p->cand[i]], pt);
        if (c == 2)
            rc = ST_ERR_GEOS;
        else if (c == 1) {
            *district = (int32_t)p->cand[i];
            break;
        }
    }
    GEOSGeom_destroy_r(h, pt);
    return rc;
}

int st_placer_anchor(st_placer *p, const st_geom *g, double xy[2])
{
    GEOSContextHandle_t h = p->gx->h;
    char err[64];
    GEOSGeometry *gg = g->nparts ? st_geom_to_geos(p->gx, g, err, sizeof err) : NULL;
    GEOSGeometry *pt = gg ? GEOSPointOnSurface_r(h, gg) : NULL;
    int ok = pt && GEOSisEmpty_r(h, pt) == 0 && GEOSGeomGetX_r(h, pt, &xy[0]) == 1 &&
             GEOSGeomGetY_r(h, pt, &xy[1]) == 1;
    if (pt)
        GEOSGeom_destroy_r(h, pt);
    if (gg)
        GEOSGeom_destroy_r(h, gg);
    return ok ? 1 : st_footprint_center(g, xy);
}

/* ---- many features, several threads ------------------------------------- */

typedef struct chunk {
    const st_districts *d;
    st_feature *const *fs;
    size_t first, end;
    st_severity sev;
    st_findings findings;
    st_place_stats stats;
    st_status rc;
    int started;                        /* a thread of its own was started */
    char error[600];                    /* what went wrong, for the diagnostic */
} chunk;

static int kept(const st_feature *f)
{
    return f->status == ST_STATUS_OK || f->status == ST_STATUS_REPAIRED;
}

static st_status place_one(st_placer *p, chunk *c, st_feature *f)
{
    double xy[2];
    f->district = -1;
    if (!st_placer_anchor(p, &f->geom, xy)) {
        c->stats.unplaceable++;
        return ST_OK;
    }
    st_status rc = st_placer_point(p, xy[0], xy[1], &f->district);
    if (rc != ST_OK)
        return rc;
    if (!kept(f))
        c->stats.aside_placed += f->district >= 0;
    else if (f->district >= 0)
        c->stats.placed++;
    else {
        c->stats.outside++;
        rc = st_findings_add(&c->findings, f->bid, ST_FINDING_PLACE_OUTSIDE, c->sev, xy[0],
                             xy[1], "no district covers its point on surface (%.9g %.9g)",
                             xy[0], xy[1]);
    }
    return rc;
}

static void *run_chunk(void *arg)
{
    chunk *c = arg;
    st_diags diags;
    st_diags_init(&diags);
    st_geos *gx = st_geos_new();
    st_placer *p = NULL;
    c->rc = gx ? st_placer_new(c->d, gx, &diags, &p) : ST_ERR_NOMEM;
    for (size_t i = c->first; c->rc == ST_OK && i < c->end; i++) {
        c->rc = place_one(p, c, c->fs[i]);
        if (c->rc == ST_ERR_GEOS)
            snprintf(c->error, sizeof c->error, "placing building %llu: %s",
                     (unsigned long long)c->fs[i]->bid, gx->last_error);
    }
    if (c->rc != ST_OK && !c->error[0])
        snprintf(c->error, sizeof c->error, "%s",
                 diags.count ? diags.items[0].message : st_status_name(c->rc));
    st_placer_free(p);
    st_geos_free(gx);
    st_diags_free(&diags);
    return NULL;
}

st_status st_place_features(const st_districts *d, st_feature *const *fs, size_t n,
                            unsigned nthreads, st_severity outside_sev, st_findings *out,
                            st_diags *diags, st_place_stats *stats)
{
    memset(stats, 0, sizeof *stats);
    if (nthreads < 1)
        nthreads = 1;
    if (nthreads > ST_PLACE_MAX_THREADS)
        nthreads = ST_PLACE_MAX_THREADS;
    if ((size_t)nthreads > n / 1024 + 1)    /* small inputs: not worth a thread */
        nthreads = (unsigned)(n / 1024 + 1);
    chunk *cs = st_calloc(nthreads, sizeof *cs);
    pthread_t *tid = st_calloc(nthreads, sizeof *tid);
    if (!cs || !tid) {
        st_free(cs);
        st_free(tid);
        return ST_ERR_NOMEM;
    }
    for (unsigned t = 0; t < nthreads; t++) {
        cs[t] = (chunk){d, fs, n * t / nthreads, n * (t + 1) / nthreads, outside_sev,
                        {NULL, 0, 0}, {0, 0, 0, 0}, ST_OK, 0, ""};
        st_findings_init(&cs[t].findings);
    }
    /* The calling thread takes the first chunk itself. */
    for (unsigned t = 1; t < nthreads; t++) {
        cs[t].started = pthread_create(&tid[t], NULL, run_chunk, &cs[t]) == 0;
        if (!cs[t].started) {
            cs[t].rc = ST_ERR_NOMEM;
            snprintf(cs[t].error, sizeof cs[t].error, "cannot start a thread");
        }
    }
    run_chunk(&cs[0]);
    st_status rc = ST_OK;
    for (unsigned t = 0; t < nthreads; t++) {
        if (cs[t].started)
            pthread_join(tid[t], NULL);
        if (rc == ST_OK && cs[t].rc != ST_OK) {
            rc = cs[t].rc;
            st_diags_add(diags, ST_SEV_ERROR, rc, NULL, "placement: %s", cs[t].error);
        }
        if (rc == ST_OK)
            rc = st_findings_move(out, &cs[t].findings);
        stats->placed += cs[t].stats.placed;
        stats->outside += cs[t].stats.outside;
        stats->aside_placed += cs[t].stats.aside_placed;
        stats->unplaceable += cs[t].stats.unplaceable;
        st_findings_free(&cs[t].findings);
    }
    st_free(cs);
    st_free(tid);
    return rc;
}
