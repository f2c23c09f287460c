/*
** core/geomx.c -- st_geom <-> GEOS, WKB and WKT through GEOS, and the
** per-thread GEOS context with its message capture.
**
** Errors: GEOS exceptions land in st_geos.last_error through the context's
** handler; callers copy them into their diagnostics.
*/
#include <stdio.h>
#include <string.h>

#include "stocktake/geomx.h"

static void on_geos_message(const char *message, void *userdata)
{
    st_geos *g = userdata;
    snprintf(g->last_error, sizeof g->last_error, "%s", message);
}

static void on_geos_notice(const char *message, void *userdata)
{
    (void)message;
    (void)userdata;   /* notices (e.g. validity chatter) are not errors */
}

st_geos *st_geos_new(void)
{
    st_geos *g = st_calloc(1, sizeof *g);
    if (!g)
        return NULL;
    g->h = GEOS_init_r();
    if (!g->h) {
        st_free(g);
        return NULL;
    }
    GEOSContext_setErrorMessageHandler_r(g->h, on_geos_message, g);
    GEOSContext_setNoticeMessageHandler_r(g->h, on_geos_notice, g);
    return g;
}

void st_geos_free(st_geos *g)
{
    if (!g)
        return;
    GEOS_finish_r(g->h);
    st_free(g);
}

void st_geos_clear_error(st_geos *g)
{
    g->last_error[0] = '\0';
}

static void set_err(char *err, size_t n, const char *fmt, const char *what)
{
    if (err && n)
        snprintf(err, n, fmt, what);
}

/* Coordinate sequence of ring r; NULL on failure (GEOS error captured). */
static GEOSCoordSequence *ring_seq(st_geos *gx, const st_geom *g, uint32_t r)
{
    uint32_t a = g->ring_coord[r], b = g->ring_coord[r + 1];
    return GEOSCoordSeq_copyFromBuffer_r(gx->h, g->xy + 2 * (size_t)a, b - a, 0, 0);
}

static GEOSGeometry *make_polygon(st_geos *gx, const st_geom *g, uint32_t p,
                                  char *err, size_t errlen)
{
    uint32_t r0 = g->part_ring[p], r1 = g->part_ring[p + 1];
    if (r0 == r1)
        return GEOSGeom_createEmptyPolygon_r(gx->h);
    GEOSGeometry **rings = st_malloc((r1 - r0) * sizeof *rings);
    if (!rings) {
        set_err(err, errlen, "%s", "out of memory");
        gx->last_status = ST_ERR_NOMEM;
        return NULL;
    }
    uint32_t made = 0;
    for (uint32_t r = r0; r < r1; r++) {
        GEOSCoordSequence *s = ring_seq(gx, g, r);
        GEOSGeometry *ring = s ? GEOSGeom_createLinearRing_r(gx->h, s) : NULL;
        if (!ring) {
            set_err(err, errlen, "%s", gx->last_error[0] ? gx->last_error : "bad ring");
            for (uint32_t k = 0; k < made; k++)
                GEOSGeom_destroy_r(gx->h, rings[k]);
            st_free(rings);
            return NULL;
        }
        rings[made++] = ring;
    }
    GEOSGeometry *poly = GEOSGeom_createPolygon_r(gx->h, rings[0],
                                                  made > 1 ? rings + 1 : NULL, made - 1);
    if (!poly) {
        set_err(err, errlen, "%s", gx->last_error);
        for (uint32_t k = 0; k < made; k++)
            GEOSGeom_destroy_r(gx->h, rings[k]);
    }
    st_free(rings);
    return poly;
}

static GEOSGeometry *make_line(st_geos *gx, const st_geom *g, uint32_t p)
{
    uint32_t r = g->part_ring[p];
    if (r == g->part_ring[p + 1])
        return GEOSGeom_createEmptyLineString_r(gx->h);
    GEOSCoordSequence *s = ring_seq(gx, g, r);
    return s ? GEOSGeom_createLineString_r(gx->h, s) : NULL;
}

static GEOSGeometry *make_point(st_geos *gx, const st_geom *g, uint32_t p)
{
    uint32_t r = g->part_ring[p];
    if (r == g->part_ring[p + 1] || g->ring_coord[r] == g->ring_coord[r + 1])
        return GEOSGeom_createEmptyPoint_r(gx->h);
    const double *c = g->xy + 2 * (size_t)g->ring_coord[r];
    return GEOSGeom_createPointFromXY_r(gx->h, c[0], c[1]);
}

static GEOSGeometry *build_geos(st_geos *gx, const st_geom *g, char *err, size_t errlen);

GEOSGeometry *st_geom_to_geos(st_geos *gx, const st_geom *g, char *err, size_t errlen)
{
    st_geos_clear_error(gx);
    gx->last_status = ST_OK;
    GEOSGeometry *out = build_geos(gx, g, err, errlen);
    if (!out && gx->last_status == ST_OK)
        gx->last_status = ST_ERR_GEOS;
    return out;
}

static GEOSGeometry *build_geos(st_geos *gx, const st_geom *g, char *err, size_t errlen)
{
    int multi_type;
    switch (g->type) {
    case ST_GEOM_NULL:
    case ST_GEOM_OTHER:
        set_err(err, errlen, "%s", "no geometry");
        return NULL;
    case ST_GEOM_POLYGON:
        return g->nparts ? make_polygon(gx, g, 0, err, errlen)
                         : GEOSGeom_createEmptyPolygon_r(gx->h);
    case ST_GEOM_LINESTRING:
        return g->nparts ? make_line(gx, g, 0) : GEOSGeom_createEmptyLineString_r(gx->h);
    case ST_GEOM_POINT:
        return g->nparts ? make_point(gx, g, 0) : GEOSGeom_createEmptyPoint_r(gx->h);
    case ST_GEOM_MULTIPOINT: multi_type = GEOS_MULTIPOINT; break;
    case ST_GEOM_MULTILINESTRING: multi_type = GEOS_MULTILINESTRING; break;
    default: multi_type = GEOS_MULTIPOLYGON; break;  /* multipolygon, collection */
    }
    if (g->nparts == 0)
        return GEOSGeom_createEmptyCollection_r(gx->h, multi_type);
    GEOSGeometry **parts = st_malloc(g->nparts * sizeof *parts);
    if (!parts) {
        set_err(err, errlen, "%s", "out of memory");
        gx->last_status = ST_ERR_NOMEM;
        return NULL;
    }
    uint32_t made = 0;
    for (uint32_t p = 0; p < g->nparts; p++) {
        GEOSGeometry *part =
            multi_type == GEOS_MULTIPOINT ? make_point(gx, g, p)
            : multi_type == GEOS_MULTILINESTRING ? make_line(gx, g, p)
            : make_polygon(gx, g, p, err, errlen);
        if (!part)
            break;
        parts[made++] = part;
    }
    GEOSGeometry *out = NULL;
    if (made == g->nparts)
        out = GEOSGeom_createCollection_r(gx->h, multi_type, parts, made);
    else if (err && !err[0])
        set_err(err, errlen, "%s", gx->last_error);
    if (!out)
        for (uint32_t k = 0; k < made; k++)
            GEOSGeom_destroy_r(gx->h, parts[k]);
    st_free(parts);
    return out;
}

/* Append the coordinates of a GEOS line or ring as a new ring of out. */
static st_status add_seq(st_geos *gx, const GEOSGeometry *line, st_geom *out)
{
    const GEOSCoordSequence *s = GEOSGeom_getCoordSeq_r(gx->h, line);
    unsigned int n = 0;
    if (!s || !GEOSCoordSeq_getSize_r(gx->h, s, &n))
        return ST_ERR_GEOS;
    st_status rc = st_geom_begin_ring(out);
    for (unsigned int i = 0; rc == ST_OK && i < n; i++) {
        double x, y;
        if (!GEOSCoordSeq_getXY_r(gx->h, s, i, &x, &y))
            return ST_ERR_GEOS;
        rc = st_geom_add_xy(out, x, y);
    }
    return rc;
}

static st_status add_part(st_geos *gx, const GEOSGeometry *p, st_geom *out)
{
    int t = GEOSGeomTypeId_r(gx->h, p);
    st_status rc = st_geom_begin_part(out);
    if (rc != ST_OK || GEOSisEmpty_r(gx->h, p) == 1)
        return rc;
    if (t == GEOS_POLYGON) {
        rc = add_seq(gx, GEOSGetExteriorRing_r(gx->h, p), out);
        int nh = GEOSGetNumInteriorRings_r(gx->h, p);
        for (int i = 0; rc == ST_OK && i < nh; i++)
            rc = add_seq(gx, GEOSGetInteriorRingN_r(gx->h, p, i), out);
        return rc;
    }
    return add_seq(gx, p, out);   /* point or line */
}

static st_geom_type type_of(int geos_type)
{
    switch (geos_type) {
    case GEOS_POINT: return ST_GEOM_POINT;
    case GEOS_LINESTRING: case GEOS_LINEARRING: return ST_GEOM_LINESTRING;
    case GEOS_POLYGON: return ST_GEOM_POLYGON;
    case GEOS_MULTIPOINT: return ST_GEOM_MULTIPOINT;
    case GEOS_MULTILINESTRING: return ST_GEOM_MULTILINESTRING;
    case GEOS_MULTIPOLYGON: return ST_GEOM_MULTIPOLYGON;
    case GEOS_GEOMETRYCOLLECTION: return ST_GEOM_COLLECTION;
    }
    return ST_GEOM_OTHER;
}

st_status st_geom_from_geos(st_geos *gx, const GEOSGeometry *geom, st_geom *out)
{
    st_geom_clear(out);
    int t = GEOSGeomTypeId_r(gx->h, geom);
    out->type = type_of(t);
    out->has_z = GEOSHasZ_r(gx->h, geom) == 1;
    if (t == GEOS_POINT || t == GEOS_LINESTRING || t == GEOS_LINEARRING || t == GEOS_POLYGON)
        return GEOSisEmpty_r(gx->h, geom) == 1 ? ST_OK : add_part(gx, geom, out);
    int n = GEOSGetNumGeometries_r(gx->h, geom);
    st_status rc = ST_OK;
    for (int i = 0; rc == ST_OK && i < n; i++) {
        const GEOSGeometry *p = GEOSGetGeometryN_r(gx->h, geom, i);
        int pt = GEOSGeomTypeId_r(gx->h, p);
        /* A collection keeps only its polygonal members (feature.h). */
        if (t == GEOS_GEOMETRYCOLLECTION && pt != GEOS_POLYGON) {
            if (pt == GEOS_MULTIPOLYGON) {
                int m = GEOSGetNumGeometries_r(gx->h, p);
                for (int k = 0; rc == ST_OK && k < m; k++)
                    rc = add_part(gx, GEOSGetGeometryN_r(gx->h, p, k), out);
            }
            continue;
        }
        rc = add_part(gx, p, out);
    }
    if (rc != ST_OK)
        st_geom_clear(out);
    return rc;
}

st_status st_geom_from_wkb(st_geos *gx, const unsigned char *wkb, size_t n,
                           st_geom *out, char *err, size_t errlen)
{
    st_geos_clear_error(gx);
    GEOSWKBReader *r = GEOSWKBReader_create_r(gx->h);
    if (!r)
        return ST_ERR_NOMEM;
    GEOSGeometry *g = GEOSWKBReader_read_r(gx->h, r, wkb, n);
    GEOSWKBReader_destroy_r(gx->h, r);
    if (!g) {
        set_err(err, errlen, "%s", gx->last_error[0] ? gx->last_error : "unreadable WKB");
        return ST_ERR_FORMAT;
    }
    st_status rc = st_geom_from_geos(gx, g, out);
    GEOSGeom_destroy_r(gx->h, g);
    return rc;
}

st_status st_geom_to_wkb(st_geos *gx, const st_geom *g, unsigned char **wkb,
                         size_t *n, char *err, size_t errlen)
{
    *wkb = NULL;
    *n = 0;
    if (g->type == ST_GEOM_NULL)
        return ST_OK;
    GEOSGeometry *geom = st_geom_to_geos(gx, g, err, errlen);
    if (!geom)
        return ST_ERR_GEOS;
    GEOSWKBWriter *w = GEOSWKBWriter_create_r(gx->h);
    st_status rc = ST_ERR_NOMEM;
    if (w) {
        GEOSWKBWriter_setOutputDimension_r(gx->h, w, 2);
        GEOSWKBWriter_setByteOrder_r(gx->h, w, GEOS_WKB_NDR);
        *wkb = GEOSWKBWriter_write_r(gx->h, w, geom, n);
        rc = *wkb ? ST_OK : ST_ERR_GEOS;
        GEOSWKBWriter_destroy_r(gx->h, w);
    }
    GEOSGeom_destroy_r(gx->h, geom);
    return rc;
}

st_status st_geom_to_wkt(st_geos *gx, const st_geom *g, st_buf *out)
{
    if (g->type == ST_GEOM_NULL)
        return ST_OK;
    char err[256] = "";
    GEOSGeometry *geom = st_geom_to_geos(gx, g, err, sizeof err);
    if (!geom)
        return ST_ERR_GEOS;
    GEOSWKTWriter *w = GEOSWKTWriter_create_r(gx->h);
    st_status rc = ST_ERR_NOMEM;
    if (w) {
        GEOSWKTWriter_setTrim_r(gx->h, w, 1);
        GEOSWKTWriter_setRoundingPrecision_r(gx->h, w, 17);
        GEOSWKTWriter_setOutputDimension_r(gx->h, w, 2);
        char *text = GEOSWKTWriter_write_r(gx->h, w, geom);
        rc = text ? st_buf_puts(out, text) : ST_ERR_GEOS;
        if (text)
            GEOSFree_r(gx->h, text);
        GEOSWKTWriter_destroy_r(gx->h, w);
    }
    GEOSGeom_destroy_r(gx->h, geom);
    return rc;
}
