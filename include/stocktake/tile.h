/*
** stocktake/tile.h -- windows for splitting one job into parts: a
** web-mercator tile address (Z/X/Y, the usual slippy-map scheme) or a
** lon/lat box, which features a window owns, and how far around it a
** part must read (the halo) so that duplicates and overlaps across its
** edge are decided as in a single run (docs/scale.md).
**
** Ownership is decided by one point per feature (st_tile_point) and one
** test (st_window_owns), so every part that sees a feature agrees on its
** owner: a tile owns the points whose tile address at its zoom is its
** own (the first and last rows reach to the poles, the last column takes
** longitude 180); a box owns west <= lon < east, south <= lat < north.
** A feature without a usable point (no coordinates, or none finite and
** in range) belongs to no window: every part holds it as "shared", and
** merge keeps one copy.
*/
#ifndef STOCKTAKE_TILE_H
#define STOCKTAKE_TILE_H

#include <stddef.h>
#include <stdint.h>

#include "stocktake/core.h"
#include "stocktake/feature.h"
#include "stocktake/geomx.h"

/* Deepest zoom accepted (tiles of about 2 m at the equator). */
#define ST_TILE_MAX_ZOOM 24

typedef struct st_window {
    int is_tile;                    /* 1: a tile, 0: a box */
    int z;                          /* tile zoom */
    uint32_t x, y;                  /* tile column, row */
    double west, south, east, north;/* lon/lat bounds (a tile's: computed) */
    char label[128];                /* "tile 14/8842/5391" or "bbox W,S,E,N" */
} st_window;

/* Parse "Z/X/Y" (0 <= Z <= ST_TILE_MAX_ZOOM, X and Y below 2^Z) or
** "W,S,E,N" (degrees, W < E, S < N, within -180..180 and -90..90). On a
** bad spec: ST_ERR_USAGE and a sentence in err (size n). */
st_status st_window_parse_tile(const char *spec, st_window *w, char *err, size_t n);
st_status st_window_parse_bbox(const char *spec, st_window *w, char *err, size_t n);

/* The tile of zoom z that owns the point (lon, lat), which must be
** finite and in range. */
void st_tile_of(double lon, double lat, int z, uint32_t *x, uint32_t *y);

/* 1 if the window owns the point (lon, lat). */
int st_window_owns(const st_window *w, double lon, double lat);

/* The window grown by 'halo_m' metres on every side, in lon/lat
** (conservative: at least that many metres at every latitude it spans;
** a halo reaching a pole takes every longitude). */
void st_window_grow(const st_window *w, double halo_m, double out[4]);

/* How far (metres, conservative: measured on the window's poleward edge)
** the box bbox[4] reaches beyond the window; 0 when inside. */
double st_window_overreach_m(const st_window *w, const double bbox[4]);

/*
** The point that decides which window owns 'g' (borrowed): its point on
** surface (GEOS, context 'gx'), or the centre of its bounding box when
** GEOS cannot give one. Returns 0 when g has no usable point (no
** coordinates, non-finite or out of lon/lat range): such a feature is
** shared by every part.
*/
int st_tile_point(st_geos *gx, const st_geom *g, double xy[2]);

#endif
