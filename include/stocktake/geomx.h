/*
** stocktake/geomx.h -- the bridge between st_geom and GEOS, and the GEOS
** context each thread owns.
**
** GEOS is used only through its reentrant _r API. An st_geos owns one
** context whose error and notice handlers write into the st_geos itself,
** so a stage can put GEOS's own words into a diagnostic. One st_geos per
** thread; never share one.
*/
#ifndef STOCKTAKE_GEOMX_H
#define STOCKTAKE_GEOMX_H

#include <geos_c.h>
#include "stocktake/core.h"
#include "stocktake/feature.h"

typedef struct st_geos {
    GEOSContextHandle_t h;
    char last_error[512];   /* GEOS's last error message, "" if none */
    st_status last_status;  /* why the last st_geom_to_geos returned NULL:
                               ST_ERR_NOMEM (our allocation) or ST_ERR_GEOS */
} st_geos;

/* Returns owned context (NULL on no memory); free with st_geos_free. */
st_geos *st_geos_new(void);
void st_geos_free(st_geos *g);
/* Clears last_error. */
void st_geos_clear_error(st_geos *g);

/*
** Build a GEOS geometry from g (borrowed). Returns owned GEOS geometry
** (destroy with GEOSGeom_destroy_r(gx->h, ...)) or NULL: then 'err' says
** why (unclosed ring, too few points, ...) and gx->last_status whether it
** was a lack of memory (ST_ERR_NOMEM) or the geometry (ST_ERR_GEOS). Rings are passed as they are:
** an unclosed ring is an error here, not silently closed.
*/
GEOSGeometry *st_geom_to_geos(st_geos *gx, const st_geom *g,
                              char *err, size_t errlen);
/* Convert a GEOS geometry (borrowed) into 'out' (cleared first). */
st_status st_geom_from_geos(st_geos *gx, const GEOSGeometry *geom,
                            st_geom *out) ST_MUST_CHECK;

/* WKB (OGC 06-103r4 / ISO, as GEOS reads it) into 'out'. */
st_status st_geom_from_wkb(st_geos *gx, const unsigned char *wkb, size_t n,
                           st_geom *out, char *err, size_t errlen) ST_MUST_CHECK;
/* Returns owned WKB (little-endian, 2-D) of g in *wkb (free with GEOSFree_r)
** and its size; NULL geometry gives *wkb = NULL. */
st_status st_geom_to_wkb(st_geos *gx, const st_geom *g, unsigned char **wkb,
                         size_t *n, char *err, size_t errlen) ST_MUST_CHECK;
/* WKT of g appended to out ("" for a null geometry). */
st_status st_geom_to_wkt(st_geos *gx, const st_geom *g, st_buf *out) ST_MUST_CHECK;

#endif
