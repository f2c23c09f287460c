/*
** tests/unit/wkt_loose.h -- a forgiving WKT reader for test fixtures only.
**
** GEOS's WKT reader refuses what the footprint stage must see: unclosed
** rings, rings of fewer than 4 positions. This reader builds an st_geom
** from whatever the text says, with no check at all: POINT, LINESTRING,
** POLYGON, MULTIPOINT, MULTILINESTRING, MULTIPOLYGON, GEOMETRYCOLLECTION
** (only its polygonal members are kept, as the readers do), EMPTY, and the
** word NULL for a null geometry. Numbers through strtod (so NaN and inf).
** Coordinates are mapped x -> x0 + x * scale, y -> y0 + y * scale.
** Returns 1 on success, 0 on a syntax error or no memory.
*/
#ifndef TESTS_WKT_LOOSE_H
#define TESTS_WKT_LOOSE_H

#include <ctype.h>
#include <stdlib.h>
#include <string.h>
#include <strings.h>

#include "stocktake/feature.h"

typedef struct wkt_cur {
    const char *p;
    double scale, x0, y0;
} wkt_cur;

static void wkt_ws(wkt_cur *c)
{
    while (isspace((unsigned char)*c->p))
        c->p++;
}

static int wkt_eat(wkt_cur *c, char ch)
{
    wkt_ws(c);
    if (*c->p != ch)
        return 0;
    c->p++;
    return 1;
}

static int wkt_word(wkt_cur *c, const char *w)
{
    wkt_ws(c);
    size_t n = strlen(w);
    if (strncasecmp(c->p, w, n) != 0 || isalpha((unsigned char)c->p[n]))
        return 0;
    c->p += n;
    return 1;
}

/* "x y" into the current ring. */
static int wkt_xy(wkt_cur *c, st_geom *g)
{
    char *end;
    double x = strtod(c->p, &end);
    if (end == c->p)
        return 0;
    c->p = end;
    double y = strtod(c->p, &end);
    if (end == c->p)
        return 0;
    c->p = end;
    return st_geom_add_xy(g, c->x0 + x * c->scale, c->y0 + y * c->scale) == ST_OK;
}

/* "(x y, x y, ...)" as a new ring. */
static int wkt_ring(wkt_cur *c, st_geom *g)
{
    if (st_geom_begin_ring(g) != ST_OK || !wkt_eat(c, '('))
        return 0;
    do {
        if (!wkt_xy(c, g))
            return 0;
    } while (wkt_eat(c, ','));
    return wkt_eat(c, ')');
}

/* "((...),(...))" or EMPTY as a new part. */
static int wkt_polygon(wkt_cur *c, st_geom *g)
{
    if (st_geom_begin_part(g) != ST_OK)
        return 0;
    if (wkt_word(c, "EMPTY"))
        return 1;
    if (!wkt_eat(c, '('))
        return 0;
    do {
        if (!wkt_ring(c, g))
            return 0;
    } while (wkt_eat(c, ','));
    return wkt_eat(c, ')');
}

/* A point or line body as a new part with one ring. */
static int wkt_simple(wkt_cur *c, st_geom *g)
{
    if (st_geom_begin_part(g) != ST_OK)
        return 0;
    if (wkt_word(c, "EMPTY"))
        return 1;
    return wkt_ring(c, g);
}

/* MULTIPOINT accepts "(1 2, 3 4)" and "((1 2), (3 4))". */
static int wkt_multipoint(wkt_cur *c, st_geom *g)
{
    if (!wkt_eat(c, '('))
        return 0;
    do {
        if (st_geom_begin_part(g) != ST_OK || st_geom_begin_ring(g) != ST_OK)
            return 0;
        int paren = wkt_eat(c, '(');
        if (!wkt_xy(c, g) || (paren && !wkt_eat(c, ')')))
            return 0;
    } while (wkt_eat(c, ','));
    return wkt_eat(c, ')');
}

static int wkt_multi(wkt_cur *c, st_geom *g, int (*member)(wkt_cur *, st_geom *))
{
    if (!wkt_eat(c, '('))
        return 0;
    do {
        if (!member(c, g))
            return 0;
    } while (wkt_eat(c, ','));
    return wkt_eat(c, ')');
}

static int wkt_geometry(wkt_cur *c, st_geom *g);

/* Members of a collection; polygonal ones are appended to g. */
static int wkt_collection(wkt_cur *c, st_geom *g)
{
    if (!wkt_eat(c, '('))
        return 0;
    do {
        st_geom m;
        st_geom_init(&m);
        int ok = wkt_geometry(c, &m);
        if (ok && (m.type == ST_GEOM_POLYGON || m.type == ST_GEOM_MULTIPOLYGON)) {
            for (uint32_t p = 0; ok && p < m.nparts; p++) {
                ok = st_geom_begin_part(g) == ST_OK;
                for (uint32_t r = m.part_ring[p]; ok && r < m.part_ring[p + 1]; r++) {
                    ok = st_geom_begin_ring(g) == ST_OK;
                    for (uint32_t i = m.ring_coord[r]; ok && i < m.ring_coord[r + 1]; i++)
                        ok = st_geom_add_xy(g, m.xy[2 * i], m.xy[2 * i + 1]) == ST_OK;
                }
            }
        }
        st_geom_clear(&m);
        if (!ok)
            return 0;
    } while (wkt_eat(c, ','));
    return wkt_eat(c, ')');
}

static int wkt_geometry(wkt_cur *c, st_geom *g)
{
    st_geom_clear(g);
    if (wkt_word(c, "NULL"))
        return 1;
    int ok = 0;
    if (wkt_word(c, "POINT"))
        g->type = ST_GEOM_POINT, ok = wkt_simple(c, g);
    else if (wkt_word(c, "LINESTRING"))
        g->type = ST_GEOM_LINESTRING, ok = wkt_simple(c, g);
    else if (wkt_word(c, "POLYGON"))
        g->type = ST_GEOM_POLYGON, ok = wkt_polygon(c, g);
    else if (wkt_word(c, "MULTIPOINT"))
        g->type = ST_GEOM_MULTIPOINT, ok = wkt_word(c, "EMPTY") || wkt_multipoint(c, g);
    else if (wkt_word(c, "MULTILINESTRING"))
        g->type = ST_GEOM_MULTILINESTRING,
        ok = wkt_word(c, "EMPTY") || wkt_multi(c, g, wkt_simple);
    else if (wkt_word(c, "MULTIPOLYGON"))
        g->type = ST_GEOM_MULTIPOLYGON,
        ok = wkt_word(c, "EMPTY") || wkt_multi(c, g, wkt_polygon);
    else if (wkt_word(c, "GEOMETRYCOLLECTION"))
        g->type = ST_GEOM_COLLECTION, ok = wkt_word(c, "EMPTY") || wkt_collection(c, g);
    /* The builder leaves an empty single polygon with one empty part. */
    if (ok && g->ncoords == 0 && g->type != ST_GEOM_COLLECTION) {
        st_geom_type t = g->type;
        st_geom_clear(g);
        g->type = t;
    }
    return ok;
}

static int wkt_loose_read(const char *text, double scale, double x0, double y0, st_geom *g)
{
    wkt_cur c = {text, scale, x0, y0};
    st_geom_init(g);
    if (!wkt_geometry(&c, g)) {
        st_geom_clear(g);
        return 0;
    }
    wkt_ws(&c);
    return *c.p == '\0';
}

#endif
