/*
** footprint/fpInt.h -- private parts of the footprint stage shared by its
** files: the checker object, ring scanning and cleaning, repair.
*/
#ifndef STOCKTAKE_FPINT_H
#define STOCKTAKE_FPINT_H

#include <geodesic.h>

#include "stocktake/footprint.h"
#include "stocktake/geomx.h"

struct st_footprint_checker {
    st_geos *gx;                 /* this thread's GEOS context, owned */
    struct geod_geodesic geod;   /* WGS 84 */
    st_footprint_extent ext;     /* current layer's extent (valid = 0: none) */
    st_findings scratch;         /* one feature's findings before commit */
    uint32_t *idx;               /* vertex index scratch for ring walks */
    size_t idx_cap;
};

/* What a walk over every ring found before GEOS sees the geometry. Each
** count comes with the lon/lat of its first occurrence. */
typedef struct fp_scan {
    uint32_t unclosed;       /* rings whose last vertex is not the first */
    uint32_t repeated;       /* consecutive repeated vertices */
    uint32_t too_few;        /* rings with fewer than 3 distinct vertices */
    uint32_t short_rings;    /* rings of fewer than 4 positions (GEOS refuses) */
    uint32_t spikes;         /* vertices where the boundary turns back */
    double unclosed_xy[2], repeated_xy[2], too_few_xy[2], spike_xy[2];
    double spike_angle_deg;  /* sharpest spike found */
    int crosses;             /* an edge spans more than 180 degrees of longitude */
} fp_scan;

/* Walk every ring of g (borrowed). spike_deg: angle below which a vertex
** is a spike (0 = no spike check). ST_ERR_NOMEM on no memory. */
st_status st_fp_scan_rings(st_footprint_checker *ck, const st_geom *g,
                        double spike_deg, fp_scan *out) ST_MUST_CHECK;

/* Build in 'dst' (cleared first) a copy of the polygonal 'src' with every
** ring closed, consecutive repeated vertices removed, and rings of fewer
** than 3 distinct vertices dropped (a shell takes its part with it).
** A collection becomes a multipolygon. *dropped counts dropped rings. */
st_status st_fp_clean(st_footprint_checker *ck, const st_geom *src, st_geom *dst,
                   uint32_t *dropped) ST_MUST_CHECK;

/* Exchange x and y of every coordinate. */
void st_fp_swap_axes(st_geom *g);
/* Longitudes below 0 + 360 (so a footprint across the antimeridian is
** contiguous for GEOS's planar algorithms), and back: above 180 - 360. */
void st_fp_unwrap(st_geom *g);
void st_fp_rewrap(st_geom *g);
double st_fp_rewrap_lon(double x);

/* Geodesic area and perimeter of ring r of g (signed area: counter-
** clockwise positive). */
void st_fp_ring_measure(const st_footprint_checker *ck, const st_geom *g, uint32_t r,
                     double *area, double *perimeter);
/* Geodesic area of part p: |shell| - sum |holes|. */
double st_fp_part_area(const st_footprint_checker *ck, const st_geom *g, uint32_t p);

/* 1 when st_geom_to_geos failed for want of memory (its only way to say
** so is its message), so the caller returns ST_ERR_NOMEM, not a finding. */
int st_fp_out_of_memory(const st_geos *gx);

/* What the repair did, for the findings. */
typedef struct fp_repair_info {
    uint32_t parts_dropped;      /* parts below min-area removed */
    double dropped_area;         /* their total area, m2 */
    char note[160];              /* a second step GEOS needed, "" if none */
    char failure[256];           /* why there is no result, "" on success */
} fp_repair_info;

/*
** Repair the invalid GEOS geometry 'in' (borrowed, coordinates unwrapped)
** with GEOS MakeValid (cfg->method), keeping polygonal parts, dropping parts
** below cfg->min_area_m2 except the largest, removing repeated vertices, and
** checking the result with GEOSisValid. On success *out (cleared first) is
** the repaired geometry and *out_gx its owned GEOS twin (destroy with
** GEOSGeom_destroy_r); when no valid polygonal result exists, *out is null,
** *out_gx NULL and info->failure says why. ST_ERR_NOMEM on no memory.
*/
st_status st_fp_repair(st_footprint_checker *ck, const st_footprint_config *cfg,
                    const GEOSGeometry *in, st_geom *out, GEOSGeometry **out_gx,
                    fp_repair_info *info) ST_MUST_CHECK;

#endif
