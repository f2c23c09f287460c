/*
** tile/tile.c -- windows (web-mercator tiles and lon/lat boxes), the
** point that decides a feature's owner, and halo arithmetic in metres.
**
** Input:   a tile address or a box as text; geometries in lon/lat.
** Output:  window bounds, ownership, grown bounds for reading.
** Errors:  a bad spec is ST_ERR_USAGE with a sentence; nothing else fails.
** Limits:  zoom 0..ST_TILE_MAX_ZOOM. Windows and halos do not wrap around
**          the antimeridian (a halo stops at +-180 degrees).
** Sources: the tile scheme is the web-mercator (EPSG:3857) one of the
**          OpenStreetMap slippy-map convention: x = floor((lon + 180) / 360
**          * 2^z), y = floor((1 - asinh(tan(lat)) / pi) / 2 * 2^z), rows
**          from the north, latitude limited to +-85.0511 degrees.
*/
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "stocktake/footprint.h"
#include "stocktake/tile.h"

#define MERCATOR_MAX_LAT 85.05112877980659
/* Metres in a degree, rounded to the safe side for each use (WGS 84: a
** degree of latitude is 110,574 m at the equator to 111,694 m at the
** poles; a degree of longitude at most 111,320 m times cos(latitude)). */
#define M_PER_DEG_LAT_MIN 110000.0
#define M_PER_DEG_LAT_MAX 111700.0
#define M_PER_DEG_LON_MIN 111000.0
#define M_PER_DEG_LON_MAX 111330.0

static double tile_lon(uint32_t x, int z)
{
    return (double)x / ldexp(1.0, z) * 360.0 - 180.0;
}

static double tile_lat(uint32_t y, int z)
{
    double n = M_PI * (1.0 - 2.0 * (double)y / ldexp(1.0, z));
    return atan(sinh(n)) * 180.0 / M_PI;
}

void st_tile_of(double lon, double lat, int z, uint32_t *x, uint32_t *y)
{
    double n = ldexp(1.0, z);
    if (lat > MERCATOR_MAX_LAT)
        lat = MERCATOR_MAX_LAT;
    if (lat < -MERCATOR_MAX_LAT)
        lat = -MERCATOR_MAX_LAT;
    double fx = floor((lon + 180.0) / 360.0 * n);
    double phi = lat * M_PI / 180.0;
    double fy = floor((1.0 - asinh(tan(phi)) / M_PI) / 2.0 * n);
    fx = fx < 0 ? 0 : fx > n - 1 ? n - 1 : fx;
    fy = fy < 0 ? 0 : fy > n - 1 ? n - 1 : fy;
    *x = (uint32_t)fx;
    *y = (uint32_t)fy;
}

/* A whole number in [0, max] from s..end, or -1. */
static long long parse_count(const char *s, const char **end, long long max)
{
    if (*s < '0' || *s > '9')
        return -1;
    long long v = 0;
    while (*s >= '0' && *s <= '9') {
        v = v * 10 + (*s++ - '0');
        if (v > max)
            return -1;
    }
    *end = s;
    return v;
}

st_status st_window_parse_tile(const char *spec, st_window *w, char *err, size_t n)
{
    memset(w, 0, sizeof *w);
    const char *p = spec;
    long long z = parse_count(p, &p, ST_TILE_MAX_ZOOM), x = -1, y = -1;
    if (z >= 0 && *p == '/')
        x = parse_count(p + 1, &p, (1LL << z) - 1);
    if (x >= 0 && *p == '/')
        y = parse_count(p + 1, &p, (1LL << z) - 1);
    if (y < 0 || *p) {
        snprintf(err, n, "'%s' is not a tile address Z/X/Y (zoom 0 to %d, X and Y below "
                 "2^Z)", spec, ST_TILE_MAX_ZOOM);
        return ST_ERR_USAGE;
    }
    w->is_tile = 1;
    w->z = (int)z;
    w->x = (uint32_t)x;
    w->y = (uint32_t)y;
    w->west = tile_lon(w->x, w->z);
    w->east = tile_lon(w->x + 1, w->z);
    w->north = w->y == 0 ? 90.0 : tile_lat(w->y, w->z);
    w->south = w->y + 1 == (1u << w->z) ? -90.0 : tile_lat(w->y + 1, w->z);
    snprintf(w->label, sizeof w->label, "tile %d/%u/%u", w->z, w->x, w->y);
    return ST_OK;
}

st_status st_window_parse_bbox(const char *spec, st_window *w, char *err, size_t n)
{
    memset(w, 0, sizeof *w);
    double v[4];
    const char *p = spec;
    int k = 0;
    for (; k < 4; k++) {
        char *end;
        v[k] = strtod(p, &end);
        if (end == p || !isfinite(v[k]))
            break;
        p = end;
        if (k < 3 && *p++ != ',')
            break;
    }
    if (k < 4 || *p || v[0] >= v[2] || v[1] >= v[3] || v[0] < -180 || v[2] > 180 ||
        v[1] < -90 || v[3] > 90) {
        snprintf(err, n, "'%s' is not a box W,S,E,N in degrees (west < east within "
                 "-180..180, south < north within -90..90)", spec);
        return ST_ERR_USAGE;
    }
    w->west = v[0];
    w->south = v[1];
    w->east = v[2];
    w->north = v[3];
    /* the box as the user wrote it (less any spaces before it) */
    while (*spec == ' ')
        spec++;
    snprintf(w->label, sizeof w->label, "bbox %.*s", (int)(sizeof w->label - 6), spec);
    return ST_OK;
}

int st_window_owns(const st_window *w, double lon, double lat)
{
    if (w->is_tile) {
        uint32_t x, y;
        st_tile_of(lon, lat, w->z, &x, &y);
        return x == w->x && y == w->y;
    }
    return lon >= w->west && lon < w->east && lat >= w->south && lat < w->north;
}

void st_window_grow(const st_window *w, double halo_m, double out[4])
{
    double dlat = halo_m / M_PER_DEG_LAT_MIN;
    double s = w->south - dlat, nn = w->north + dlat;
    s = s < -90 ? -90 : s;
    nn = nn > 90 ? 90 : nn;
    double far = fabs(s) > fabs(nn) ? fabs(s) : fabs(nn);
    double c = cos(far * M_PI / 180.0);
    double dlon = far >= 89.0 ? 360.0 : halo_m / (M_PER_DEG_LON_MIN * c);
    out[0] = w->west - dlon < -180 ? -180 : w->west - dlon;
    out[1] = s;
    out[2] = w->east + dlon > 180 ? 180 : w->east + dlon;
    out[3] = nn;
}

double st_window_overreach_m(const st_window *w, const double b[4])
{
    double dx = fmax(0.0, fmax(w->west - b[0], b[2] - w->east));
    double dy = fmax(0.0, fmax(w->south - b[1], b[3] - w->north));
    /* the largest metres a degree of longitude can be over the box */
    double lo = fmin(fabs(b[1]), fabs(b[3]));
    if (b[1] <= 0 && b[3] >= 0)
        lo = 0;
    double mx = dx * M_PER_DEG_LON_MAX * cos(fmin(lo, 90.0) * M_PI / 180.0);
    double my = dy * M_PER_DEG_LAT_MAX;
    return fmax(mx, my);
}

static int usable(const double xy[2])
{
    return isfinite(xy[0]) && isfinite(xy[1]) && fabs(xy[0]) <= 180 && fabs(xy[1]) <= 90;
}

int st_tile_point(st_geos *gx, const st_geom *g, double xy[2])
{
    if (g->type == ST_GEOM_NULL || g->ncoords == 0)
        return 0;
    GEOSContextHandle_t h = gx->h;
    char err[64];
    GEOSGeometry *gg = g->nparts ? st_geom_to_geos(gx, g, err, sizeof err) : NULL;
    GEOSGeometry *pt = gg ? GEOSPointOnSurface_r(h, gg) : NULL;
    int ok = pt && GEOSisEmpty_r(h, pt) == 0 && GEOSGeomGetX_r(h, pt, &xy[0]) == 1 &&
             GEOSGeomGetY_r(h, pt, &xy[1]) == 1;
    if (pt)
        GEOSGeom_destroy_r(h, pt);
    if (gg)
        GEOSGeom_destroy_r(h, gg);
    st_geos_clear_error(gx);
    if (!ok && !st_footprint_center(g, xy))
        return 0;
    return usable(xy);
}
