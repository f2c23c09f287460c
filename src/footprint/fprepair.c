/*
** footprint/fprepair.c -- the make-valid repair of one invalid footprint.
**
** Input:   an invalid GEOS polygon or multipolygon (borrowed), in the
**          checker's GEOS context, longitudes unwrapped across the
**          antimeridian by the caller.
** Output:  a valid polygon or multipolygon as st_geom plus its GEOS twin,
**          or a failure text when nothing polygonal and valid remains.
** Errors:  ST_ERR_NOMEM; GEOS exceptions become the failure text (the
**          caller rejects the feature), never a run error.
** Method:  GEOS MakeValid with the configured method (structure by
**          default; docs/footprint.md says why), collapsed parts dropped;
**          should GEOS's own result be invalid, a union of it, else the
**          other method; then only polygonal parts kept, parts below
**          min-area dropped except the largest, repeated vertices removed,
**          and the result checked with GEOSisValid -- a repair is never
**          trusted unseen.
*/
#include <math.h>
#include <stdio.h>
#include <string.h>

#include "fpInt.h"

static void set_failure(fp_repair_info *info, const char *what, const st_geos *gx)
{
    snprintf(info->failure, sizeof info->failure, "%s%s%.160s", what,
             gx && gx->last_error[0] ? ": " : "", gx ? gx->last_error : "");
}

/* GEOS MakeValid with 'method'; NULL on a GEOS exception. */
static GEOSGeometry *make_valid_with(st_geos *gx, st_repair_method method,
                                     const GEOSGeometry *in)
{
    GEOSMakeValidParams *params = GEOSMakeValidParams_create_r(gx->h);
    if (!params)
        return NULL;
    GEOSMakeValidParams_setMethod_r(gx->h, params, method == ST_REPAIR_LINEWORK
                                                       ? GEOS_MAKE_VALID_LINEWORK
                                                       : GEOS_MAKE_VALID_STRUCTURE);
    /* Collapsed parts (spikes, cut lines, zero-area rings) are not building. */
    GEOSMakeValidParams_setKeepCollapsed_r(gx->h, params, 0);
    GEOSGeometry *out = GEOSMakeValidWithParams_r(gx->h, in, params);
    GEOSMakeValidParams_destroy_r(gx->h, params);
    return out;
}

/*
** MakeValid with the configured method, then second steps when its result
** is itself invalid. GEOS 3.11.1's structure method can return parts that
** share an edge: one real footprint does (north_macedonia, see
** tests/unit/test_footprint_real.c). A union merges such parts without
** changing the area covered; if that does not help, the other method is
** tried. Whatever comes out is still checked by the caller.
*/
static GEOSGeometry *make_valid(st_geos *gx, const st_footprint_config *cfg,
                                const GEOSGeometry *in, fp_repair_info *info)
{
    GEOSGeometry *mv = make_valid_with(gx, cfg->method, in);
    if (!mv || GEOSisValid_r(gx->h, mv) == 1)
        return mv;
    GEOSGeometry *merged = GEOSUnaryUnion_r(gx->h, mv);
    if (merged && GEOSisValid_r(gx->h, merged) == 1) {
        GEOSGeom_destroy_r(gx->h, mv);
        snprintf(info->note, sizeof info->note,
                 "MakeValid's parts overlapped or shared an edge; merged them with a union");
        return merged;
    }
    if (merged)
        GEOSGeom_destroy_r(gx->h, merged);
    st_repair_method other = cfg->method == ST_REPAIR_LINEWORK ? ST_REPAIR_STRUCTURE
                                                               : ST_REPAIR_LINEWORK;
    GEOSGeometry *second = make_valid_with(gx, other, in);
    if (second && GEOSisValid_r(gx->h, second) == 1) {
        GEOSGeom_destroy_r(gx->h, mv);
        snprintf(info->note, sizeof info->note,
                 "MakeValid's result was invalid; used the %s method",
                 st_repair_method_name(other));
        return second;
    }
    if (second)
        GEOSGeom_destroy_r(gx->h, second);
    return mv;   /* the caller's validity check rejects it */
}

static st_status append_part(const st_geom *src, uint32_t p, st_geom *dst)
{
    st_status rc = st_geom_begin_part(dst);
    for (uint32_t r = src->part_ring[p]; rc == ST_OK && r < src->part_ring[p + 1]; r++) {
        rc = st_geom_begin_ring(dst);
        for (uint32_t i = src->ring_coord[r]; rc == ST_OK && i < src->ring_coord[r + 1]; i++)
            rc = st_geom_add_xy(dst, src->xy[2 * i], src->xy[2 * i + 1]);
    }
    return rc;
}

/* Copy into dst the parts of src at least min_area large, and the largest
** part whatever its size: a repair must not turn a small building into
** nothing (it is then flagged as a fragment like any other). */
static st_status keep_large_parts(const st_footprint_checker *ck, const st_geom *src,
                                  double min_area, st_geom *dst, fp_repair_info *info)
{
    uint32_t largest = 0;
    double largest_area = -INFINITY;
    for (uint32_t p = 0; p < src->nparts; p++) {
        double a = st_fp_part_area(ck, src, p);
        if (a > largest_area) {
            largest_area = a;
            largest = p;
        }
    }
    st_geom_clear(dst);
    dst->type = ST_GEOM_MULTIPOLYGON;
    for (uint32_t p = 0; p < src->nparts; p++) {
        double a = st_fp_part_area(ck, src, p);
        if (p != largest && a < min_area) {
            info->parts_dropped++;
            info->dropped_area += a;
            continue;
        }
        st_status rc = append_part(src, p, dst);
        if (rc != ST_OK)
            return rc;
    }
    return ST_OK;
}

int st_fp_out_of_memory(const st_geos *gx)
{
    return gx->last_status == ST_ERR_NOMEM;
}

/* *twin = GEOS twin of g if it is valid, else NULL with info->failure set. */
static st_status valid_twin(st_geos *gx, const st_geom *g, GEOSGeometry **twin,
                            fp_repair_info *info)
{
    char err[256] = "";
    *twin = st_geom_to_geos(gx, g, err, sizeof err);
    if (!*twin) {
        if (st_fp_out_of_memory(gx))
            return ST_ERR_NOMEM;
        snprintf(info->failure, sizeof info->failure, "repaired geometry unusable: %s", err);
        return ST_OK;
    }
    if (GEOSisValid_r(gx->h, *twin) != 1) {
        set_failure(info, "GEOS MakeValid gave an invalid geometry", NULL);
        GEOSGeom_destroy_r(gx->h, *twin);
        *twin = NULL;
    }
    return ST_OK;
}

static int is_polygonal(st_geom_type t)
{
    return t == ST_GEOM_POLYGON || t == ST_GEOM_MULTIPOLYGON || t == ST_GEOM_COLLECTION;
}

st_status st_fp_repair(st_footprint_checker *ck, const st_footprint_config *cfg,
                    const GEOSGeometry *in, st_geom *out, GEOSGeometry **out_gx,
                    fp_repair_info *info)
{
    memset(info, 0, sizeof *info);
    st_geom_clear(out);
    *out_gx = NULL;
    st_geos_clear_error(ck->gx);
    GEOSGeometry *mv = make_valid(ck->gx, cfg, in, info);
    if (!mv) {
        set_failure(info, "GEOS MakeValid failed", ck->gx);
        return ST_OK;
    }
    st_geom raw, kept;
    st_geom_init(&raw);
    st_geom_init(&kept);
    st_status rc = st_geom_from_geos(ck->gx, mv, &raw);   /* polygonal members only */
    GEOSGeom_destroy_r(ck->gx->h, mv);
    if (rc == ST_OK && (!is_polygonal(raw.type) || raw.nparts == 0)) {
        set_failure(info, "nothing polygonal is left after MakeValid "
                          "(the footprint collapses to lines or points)", NULL);
        goto done;
    }
    if (rc == ST_OK)
        rc = keep_large_parts(ck, &raw, cfg->min_area_m2, &kept, info);
    uint32_t dropped_rings;
    if (rc == ST_OK)
        rc = st_fp_clean(ck, &kept, out, &dropped_rings);
    if (rc == ST_OK && out->nparts == 0)
        set_failure(info, "nothing polygonal is left after MakeValid", NULL);
    else if (rc == ST_OK) {
        out->type = out->nparts == 1 ? ST_GEOM_POLYGON : ST_GEOM_MULTIPOLYGON;
        rc = valid_twin(ck->gx, out, out_gx, info);
    }
done:
    if (rc == ST_ERR_GEOS) {
        set_failure(info, "GEOS MakeValid result unreadable", ck->gx);
        rc = ST_OK;
    }
    if (rc != ST_OK || !*out_gx)
        st_geom_clear(out);
    st_geom_clear(&raw);
    st_geom_clear(&kept);
    return rc;
}
