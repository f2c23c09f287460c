/*
** footprint/footprint.c -- the checker object and the per-feature flow of
** the footprint stage.
**
** Input:   one st_feature (lon/lat WGS 84) and a read-only config.
** Output:  status, reason, flags, geodesic measures and findings on the
**          feature; the repaired geometry when the policy repairs.
** Errors:  only ST_ERR_NOMEM leaves the function with an error; all work is
**          done on copies and committed at the end, so a failure changes
**          neither the feature nor the caller's findings list. Problems of
**          the footprint itself (including GEOS exceptions on it) are
**          findings.
** Limits:  ST_FOOTPRINT_MAX_COORDS coordinates per feature.
**
** Order of the checks (each stops the feature when it rejects it):
**   null -> type -> empty -> size limit -> non-finite coordinates ->
**   swapped axes -> lon/lat range -> ring scan (closure, repeats, too few
**   points, spikes) -> GEOS validity -> repair -> measures -> shape.
*/
#include <math.h>
#include <stdarg.h>
#include <stdio.h>
#include <string.h>

#include "fpInt.h"

/* ---- checker -------------------------------------------------------------- */

st_status st_footprint_checker_new(st_footprint_checker **out)
{
    *out = NULL;
    st_footprint_checker *ck = st_calloc(1, sizeof *ck);
    if (!ck)
        return ST_ERR_NOMEM;
    ck->gx = st_geos_new();
    if (!ck->gx) {
        st_free(ck);
        return ST_ERR_NOMEM;
    }
    geod_init(&ck->geod, 6378137.0, 1.0 / 298.257223563);   /* WGS 84 */
    st_findings_init(&ck->scratch);
    *out = ck;
    return ST_OK;
}

void st_footprint_checker_free(st_footprint_checker *ck)
{
    if (!ck)
        return;
    st_geos_free(ck->gx);
    st_findings_free(&ck->scratch);
    st_free(ck->idx);
    st_free(ck);
}

void st_footprint_checker_set_extent(st_footprint_checker *ck, const st_footprint_extent *ext)
{
    if (ext)
        ck->ext = *ext;
    else
        memset(&ck->ext, 0, sizeof ck->ext);
}

const st_geom *st_footprint_source_geom(const st_feature *f)
{
    return f->source_geom ? f->source_geom : &f->geom;
}

/* ---- one feature's run ---------------------------------------------------- */

typedef struct fp_run {
    st_footprint_checker *ck;
    const st_footprint_config *cfg;
    const st_feature *f;
    uint32_t flags;
    uint64_t emitted;          /* bit per st_fp_code already reported */
    st_feature_status status;
    char reason[320];          /* why rejected */
    char repairs[256];         /* what the repair did, "; "-separated */
    st_geom work;              /* the geometry being checked (owned copy) */
    int changed;               /* work differs from the source */
    GEOSGeometry *final_gx;    /* GEOS twin of a valid 'work' (unwrapped), or NULL */
    int unwrapped;             /* work's longitudes are shifted by st_fp_unwrap */
    double source_area;
    double source_perimeter;
    int measured_as_read;      /* source_area was measured on a 'work' that
                                  was bit for bit the geometry as read */
    double area, perimeter;
} fp_run;

static st_status add(fp_run *r, st_fp_code code, double x, double y,
                     const char *fmt, ...) ST_PRINTF(5, 6);

/* Adds one finding to the checker's scratch list. */
static st_status add(fp_run *r, st_fp_code code, double x, double y, const char *fmt, ...)
{
    char msg[768];
    va_list ap;
    va_start(ap, fmt);
    vsnprintf(msg, sizeof msg, fmt, ap);
    va_end(ap);
    r->emitted |= (uint64_t)1 << code;
    return st_findings_add(&r->ck->scratch, r->f->bid, st_footprint_code_name(code),
                           r->cfg->severity[code], x, y, "%s", msg);
}

static void reject(fp_run *r, const char *fmt, ...) ST_PRINTF(2, 3);

static void reject(fp_run *r, const char *fmt, ...)
{
    va_list ap;
    va_start(ap, fmt);
    vsnprintf(r->reason, sizeof r->reason, fmt, ap);
    va_end(ap);
    r->status = ST_STATUS_REJECTED;
}

static void note_repair(fp_run *r, const char *what)
{
    size_t n = strlen(r->repairs);
    snprintf(r->repairs + n, sizeof r->repairs - n, "%s%s", n ? "; " : "", what);
    r->changed = 1;
}

static const char *policy_words(const fp_run *r)
{
    return r->cfg->repair == ST_REPAIR_REJECT ? " (repair policy: reject)" : "";
}

/* First vertex of g, or NAN when there is none. */
static void first_xy(const st_geom *g, double *x, double *y)
{
    *x = g->ncoords ? g->xy[0] : NAN;
    *y = g->ncoords ? g->xy[1] : NAN;
}

/* ---- type, coordinates, axes ------------------------------------------- */

static int polygonal(st_geom_type t)
{
    return t == ST_GEOM_POLYGON || t == ST_GEOM_MULTIPOLYGON || t == ST_GEOM_COLLECTION;
}

static void lower(const char *s, char *out, size_t n)
{
    size_t i = 0;
    for (; s[i] && i + 1 < n; i++)
        out[i] = (char)(s[i] >= 'A' && s[i] <= 'Z' ? s[i] - 'A' + 'a' : s[i]);
    out[i] = '\0';
}

/* Null, wrong type, empty, size limit: all reject on the spot. */
static st_status check_kind(fp_run *r)
{
    const st_geom *g = &r->f->geom;
    double x, y;
    first_xy(g, &x, &y);
    if (g->type == ST_GEOM_NULL) {
        r->flags |= ST_FLAG_NULL;
        reject(r, "no geometry");
        return add(r, ST_FP_NULL, NAN, NAN, "the feature has no geometry");
    }
    if (!polygonal(g->type) || (g->type == ST_GEOM_COLLECTION && g->ncoords == 0)) {
        char name[32];
        lower(st_geom_type_name(g->type), name, sizeof name);
        r->flags |= ST_FLAG_WRONG_TYPE;
        reject(r, "a %s is not a footprint", name);
        return add(r, ST_FP_WRONG_TYPE, x, y, "%s", g->type == ST_GEOM_COLLECTION
                       ? "geometry collection without a polygonal member"
                       : "the geometry is not polygonal: no footprint to keep");
    }
    if (g->ncoords == 0) {
        r->flags |= ST_FLAG_EMPTY;
        reject(r, "empty geometry");
        return add(r, ST_FP_EMPTY, NAN, NAN, "the %s has no coordinates",
                   st_geom_type_name(g->type));
    }
    if (g->ncoords > ST_FOOTPRINT_MAX_COORDS || g->nrings > ST_FOOTPRINT_MAX_COORDS) {
        r->flags |= ST_FLAG_MANY_VERTICES;
        reject(r, "more than %u vertices or rings", ST_FOOTPRINT_MAX_COORDS);
        return add(r, ST_FP_MANY_VERTICES, x, y,
                   "%u vertices in %u rings: beyond the hard limit of %u",
                   g->ncoords, g->nrings, ST_FOOTPRINT_MAX_COORDS);
    }
    if (g->type == ST_GEOM_COLLECTION) {
        r->flags |= ST_FLAG_WRONG_TYPE;
        return add(r, ST_FP_COLLECTION, x, y,
                   "geometry collection: only its %u polygon(s) are kept", g->nparts);
    }
    return ST_OK;
}

static st_status check_finite(fp_run *r)
{
    const st_geom *g = &r->f->geom;
    for (uint32_t i = 0; i < g->ncoords; i++) {
        double x = g->xy[2 * i], y = g->xy[2 * i + 1];
        if (isfinite(x) && isfinite(y))
            continue;
        r->flags |= ST_FLAG_BAD_COORD;
        reject(r, "coordinate is not a finite number");
        return add(r, ST_FP_BAD_COORD, NAN, NAN,
                   "vertex %u is (%g %g): not a finite number", i + 1, x, y);
    }
    return ST_OK;
}

static int in_extent(const st_footprint_extent *e, double x, double y)
{
    return x >= e->xmin && x <= e->xmax && y >= e->ymin && y <= e->ymax;
}

/* Own centre outside the layer's extent, swapped centre inside. */
static st_status check_swapped(fp_run *r)
{
    const st_footprint_extent *e = &r->ck->ext;
    double c[2];
    if (!e->valid || !st_footprint_center(&r->work, c))
        return ST_OK;
    if (in_extent(e, c[0], c[1]) || !in_extent(e, c[1], c[0]))
        return ST_OK;
    r->flags |= ST_FLAG_SWAPPED;
    const char *action = r->cfg->repair == ST_REPAIR_MAKE_VALID ? "; swapped back"
                       : r->cfg->repair == ST_REPAIR_REJECT ? "; rejected" : "";
    st_status rc = add(r, ST_FP_SWAPPED, c[0], c[1],
                       "latitude and longitude look swapped: the footprint lies at "
                       "lon %.6f lat %.6f, outside the layer's extent (lon %.4f..%.4f, "
                       "lat %.4f..%.4f); swapped it would lie inside%s",
                       c[0], c[1], e->xmin, e->xmax, e->ymin, e->ymax, action);
    if (rc != ST_OK)
        return rc;
    if (r->cfg->repair == ST_REPAIR_MAKE_VALID) {
        st_fp_swap_axes(&r->work);
        note_repair(r, "swapped longitude and latitude back");
    } else if (r->cfg->repair == ST_REPAIR_REJECT) {
        reject(r, "latitude and longitude look swapped%s", policy_words(r));
    }
    return ST_OK;
}

int st_footprint_swap_suspect(const st_footprint_extent *ext, const st_feature *f)
{
    double c[2];
    return ext && ext->valid && st_footprint_center(st_footprint_source_geom(f), c) &&
           !in_extent(ext, c[0], c[1]) && in_extent(ext, c[1], c[0]);
}

void st_footprint_reset(st_feature *f)
{
    if (f->source_geom) {
        st_geom_clear(&f->geom);
        f->geom = *f->source_geom;
        st_free(f->source_geom);   /* the arrays moved back into f->geom */
        f->source_geom = NULL;
    }
    st_free(f->reason);
    f->reason = NULL;
    f->status = ST_STATUS_OK;
    f->flags = 0;
    f->area_m2 = f->perimeter_m = 0.0;
}

static st_status check_range(fp_run *r)
{
    const st_geom *g = &r->work;
    for (uint32_t i = 0; i < g->ncoords; i++) {
        double x = g->xy[2 * i], y = g->xy[2 * i + 1];
        if (fabs(x) <= 180.0 && fabs(y) <= 90.0)
            continue;
        r->flags |= ST_FLAG_OUT_OF_RANGE;
        int swapped = (r->flags & ST_FLAG_SWAPPED) != 0;
        reject(r, "coordinate outside lon/lat range%s",
               swapped ? " (latitude and longitude look swapped)" : "");
        return add(r, ST_FP_OUT_OF_RANGE, NAN, NAN,
                   "vertex %u is (%.9g %.9g): longitude must lie in -180..180 and "
                   "latitude in -90..90%s", i + 1, x, y,
                   swapped ? "; latitude and longitude look swapped" : "");
    }
    return ST_OK;
}

/* ---- rings before GEOS ---------------------------------------------------- */

static st_status report_scan(fp_run *r, const fp_scan *s)
{
    st_status rc = ST_OK;
    if (s->unclosed) {
        r->flags |= ST_FLAG_UNCLOSED;
        rc = add(r, ST_FP_UNCLOSED, s->unclosed_xy[0], s->unclosed_xy[1],
                 "%u ring(s) not closed: the last vertex is not the first", s->unclosed);
    }
    if (rc == ST_OK && s->repeated) {
        r->flags |= ST_FLAG_REPEATED;
        rc = add(r, ST_FP_REPEATED, s->repeated_xy[0], s->repeated_xy[1],
                 "%u consecutive repeated vertex(es)", s->repeated);
    }
    if (rc == ST_OK && s->too_few) {
        r->flags |= ST_FLAG_TOO_FEW_POINTS;
        rc = add(r, ST_FP_TOO_FEW_POINTS, s->too_few_xy[0], s->too_few_xy[1],
                 "%u ring(s) with fewer than 3 distinct vertices", s->too_few);
    }
    if (rc == ST_OK && s->spikes) {
        r->flags |= ST_FLAG_SPIKE;
        rc = add(r, ST_FP_SPIKE, s->spike_xy[0], s->spike_xy[1],
                 "%u spike(s): the boundary turns back at %.3g degrees "
                 "(threshold %.3g)", s->spikes, s->spike_angle_deg,
                 r->cfg->spike_angle_deg);
    }
    return rc;
}

/* Under make-valid: close rings, drop repeats and degenerate rings.
** Otherwise: reject what GEOS cannot even build. */
static st_status prepare_rings(fp_run *r, const fp_scan *s)
{
    if (r->cfg->repair != ST_REPAIR_MAKE_VALID) {
        if (s->unclosed)
            reject(r, "ring not closed%s", policy_words(r));
        else if (s->short_rings)
            reject(r, "ring with fewer than 4 positions%s", policy_words(r));
        else if (s->too_few && r->cfg->repair == ST_REPAIR_REJECT)
            reject(r, "ring with fewer than 3 distinct vertices%s", policy_words(r));
        return ST_OK;
    }
    if (!s->unclosed && !s->repeated && !s->too_few && r->work.type != ST_GEOM_COLLECTION)
        return ST_OK;
    st_geom clean;
    st_geom_init(&clean);
    uint32_t dropped;
    st_status rc = st_fp_clean(r->ck, &r->work, &clean, &dropped);
    if (rc != ST_OK)
        return rc;
    st_geom_clear(&r->work);
    r->work = clean;
    if (s->unclosed)
        note_repair(r, "closed the ring(s)");
    if (s->repeated)
        note_repair(r, "removed repeated vertices");
    if (dropped)
        note_repair(r, "dropped ring(s) of fewer than 3 distinct vertices");
    if (r->f->geom.type == ST_GEOM_COLLECTION)
        note_repair(r, "kept the collection's polygons as a multipolygon");
    if (r->work.nparts == 0) {
        reject(r, "no ring encloses an area");
        return add(r, ST_FP_REPAIR_FAILED, s->too_few_xy[0], s->too_few_xy[1],
                   "nothing is left once degenerate rings are dropped");
    }
    return ST_OK;
}

/* ---- GEOS validity and repair ----------------------------------------------- */

static st_fp_code code_of_reason(const char *reason)
{
    static const struct { const char *text; st_fp_code code; } map[] = {
        {"Self-intersection", ST_FP_SELF_INTERSECTION},
        {"Ring Self-intersection", ST_FP_RING_SELF_INTERSECTION},
        {"Hole lies outside shell", ST_FP_HOLE_OUTSIDE_SHELL},
        {"Holes are nested", ST_FP_NESTED_HOLES},
        {"Interior is disconnected", ST_FP_DISCONNECTED_INTERIOR},
        {"Nested shells", ST_FP_NESTED_SHELLS},
        {"Duplicate Rings", ST_FP_DUPLICATE_RINGS},
        {"Too few points in geometry component", ST_FP_TOO_FEW_POINTS},
        {"Invalid Coordinate", ST_FP_BAD_COORD},
        {"Ring is not closed", ST_FP_UNCLOSED},
    };
    for (size_t i = 0; i < sizeof map / sizeof map[0]; i++)
        if (strcmp(reason, map[i].text) == 0)
            return map[i].code;
    return ST_FP_INVALID_OTHER;
}

static st_status geos_failed(fp_run *r, const char *what)
{
    r->flags |= ST_FLAG_GEOS_ERROR;
    reject(r, "GEOS could not process the geometry");
    double x, y;
    first_xy(&r->work, &x, &y);
    return add(r, ST_FP_GEOS_ERROR, st_fp_rewrap_lon(x), y, "%s: %s", what,
               r->ck->gx->last_error[0] ? r->ck->gx->last_error : "unknown error");
}

static void point_of(st_geos *gx, const GEOSGeometry *pt, double *x, double *y)
{
    *x = *y = NAN;
    if (pt && GEOSisEmpty_r(gx->h, pt) == 0) {
        GEOSGeomGetX_r(gx->h, pt, x);
        GEOSGeomGetY_r(gx->h, pt, y);
        *x = st_fp_rewrap_lon(*x);
    }
}

static st_status repair(fp_run *r, const GEOSGeometry *in)
{
    st_geom fixed;
    st_geom_init(&fixed);
    fp_repair_info info;
    GEOSGeometry *twin;
    st_status rc = st_fp_repair(r->ck, r->cfg, in, &fixed, &twin, &info);
    if (rc != ST_OK)
        return rc;
    if (!twin) {
        double x, y;
        first_xy(&r->work, &x, &y);
        reject(r, "repair failed: %s", info.failure);
        return add(r, ST_FP_REPAIR_FAILED, st_fp_rewrap_lon(x), y, "%s", info.failure);
    }
    st_geom_clear(&r->work);
    r->work = fixed;
    r->final_gx = twin;
    char what[224];
    snprintf(what, sizeof what, "GEOS MakeValid (%s method%s%s)",
             st_repair_method_name(r->cfg->method), info.note[0] ? "; " : "", info.note);
    note_repair(r, what);
    if (info.parts_dropped) {
        double x, y;
        first_xy(&r->work, &x, &y);
        rc = add(r, ST_FP_PARTS_DROPPED, st_fp_rewrap_lon(x), y,
                 "the repair dropped %u part(s) smaller than %g m2 (%.2f m2 together)",
                 info.parts_dropped, r->cfg->min_area_m2, info.dropped_area);
    }
    return rc;
}

/* GEOSisValidDetail on the work geometry; repairs or rejects as configured. */
static st_status check_validity(fp_run *r)
{
    st_geos *gx = r->ck->gx;
    char err[256] = "";
    GEOSGeometry *g = st_geom_to_geos(gx, &r->work, err, sizeof err);
    if (!g && st_fp_out_of_memory(gx))
        return ST_ERR_NOMEM;
    if (!g)
        return geos_failed(r, err[0] ? err : "cannot build the geometry");
    char *why = NULL;
    GEOSGeometry *where = NULL;
    char valid = GEOSisValidDetail_r(gx->h, g, 0, &why, &where);
    st_status rc = ST_OK;
    if (valid == 1) {
        r->final_gx = g;
        g = NULL;
    } else if (!why) {          /* 2: GEOS raised an exception */
        rc = geos_failed(r, "validity check failed");
    } else {
        st_fp_code code = code_of_reason(why);
        double x, y;
        point_of(gx, where, &x, &y);
        r->flags |= ST_FLAG_INVALID;
        if (!(r->emitted & ((uint64_t)1 << code)))
            rc = add(r, code, x, y, "%s at (%.9g %.9g)", why, x, y);
        if (rc == ST_OK && r->cfg->repair == ST_REPAIR_REJECT)
            reject(r, "%s at (%.9g %.9g)%s", why, x, y, policy_words(r));
        else if (rc == ST_OK && r->cfg->repair == ST_REPAIR_MAKE_VALID)
            rc = repair(r, g);
    }
    if (why)
        GEOSFree_r(gx->h, why);
    if (where)
        GEOSGeom_destroy_r(gx->h, where);
    if (g)
        GEOSGeom_destroy_r(gx->h, g);
    return rc;
}

/* ---- measures and shape ----------------------------------------------------- */

/* A point on the footprint for shape findings: GEOS's point on surface of
** the final geometry when there is one, else its first vertex. */
static void label_point(fp_run *r, double *x, double *y)
{
    first_xy(&r->work, x, y);
    *x = st_fp_rewrap_lon(*x);
    if (!r->final_gx)
        return;
    GEOSGeometry *pt = GEOSPointOnSurface_r(r->ck->gx->h, r->final_gx);
    if (pt) {
        point_of(r->ck->gx, pt, x, y);
        GEOSGeom_destroy_r(r->ck->gx->h, pt);
    }
}

static st_status check_shape(fp_run *r)
{
    const st_footprint_config *c = r->cfg;
    double pp = st_footprint_compactness(r->area, r->perimeter);
    uint32_t nv = r->work.ncoords;
    int fragment = r->area < c->min_area_m2;
    int oversize = c->max_area_m2 > 0 && r->area > c->max_area_m2;
    int sliver = pp < c->min_compactness;
    int many = c->max_vertices > 0 && nv > c->max_vertices;
    if (!fragment && !oversize && !sliver && !many)
        return ST_OK;
    double x, y;
    label_point(r, &x, &y);
    st_status rc = ST_OK;
    if (fragment) {
        r->flags |= ST_FLAG_FRAGMENT;
        rc = add(r, ST_FP_FRAGMENT, x, y, "area %.2f m2 is below %g m2", r->area,
                 c->min_area_m2);
    }
    if (rc == ST_OK && oversize) {
        r->flags |= ST_FLAG_OVERSIZE;
        rc = add(r, ST_FP_OVERSIZE, x, y, "area %.0f m2 is above %g m2", r->area,
                 c->max_area_m2);
    }
    if (rc == ST_OK && sliver) {
        r->flags |= ST_FLAG_SLIVER;
        rc = add(r, ST_FP_SLIVER, x, y, "compactness 4*pi*A/P^2 = %.4f is below %g "
                 "(area %.2f m2, perimeter %.2f m)", pp, c->min_compactness,
                 r->area, r->perimeter);
    }
    if (rc == ST_OK && many) {
        r->flags |= ST_FLAG_MANY_VERTICES;
        rc = add(r, ST_FP_MANY_VERTICES, x, y, "%u vertices, more than %u", nv,
                 c->max_vertices);
    }
    return rc;
}

/* Relative area change of a repair, on the larger of the two areas so that
** a source area of 0 (a bow-tie) still gives a number. */
static double area_change(double before, double after)
{
    double base = fmax(fabs(before), fabs(after));
    return base > 0.0 ? fabs(after - before) / base : 0.0;
}

static st_status report_repair(fp_run *r)
{
    double x, y;
    label_point(r, &x, &y);
    r->flags |= ST_FLAG_REPAIRED;
    st_status rc = add(r, ST_FP_REPAIRED, x, y, "%s; area %.2f m2 (source %.2f m2)",
                       r->repairs, r->area, r->source_area);
    double change = area_change(r->source_area, r->area);
    if (rc == ST_OK && change > r->cfg->max_area_change) {
        r->flags |= ST_FLAG_AREA_CHANGED;
        rc = add(r, ST_FP_AREA_CHANGED, x, y,
                 "the repair changed the area by %.1f %% (%.2f -> %.2f m2; "
                 "tolerance %g %%)", 100.0 * change, r->source_area, r->area,
                 100.0 * r->cfg->max_area_change);
    }
    return rc;
}

/* ---- the flow --------------------------------------------------------------- */

static int rejected(const fp_run *r)
{
    return r->status == ST_STATUS_REJECTED;
}

/* 1 if a and b hold the same type, parts, rings and coordinates, bit for
** bit (so any measure of one is the measure of the other). */
static int same_geom(const st_geom *a, const st_geom *b)
{
    if (a->type != b->type || a->nparts != b->nparts || a->nrings != b->nrings ||
        a->ncoords != b->ncoords)
        return 0;
    return (!a->nparts || !memcmp(a->part_ring, b->part_ring, (a->nparts + 1) * sizeof *a->part_ring)) &&
           (!a->nrings || !memcmp(a->ring_coord, b->ring_coord, (a->nrings + 1) * sizeof *a->ring_coord)) &&
           (!a->ncoords || !memcmp(a->xy, b->xy, 2 * (size_t)a->ncoords * sizeof *a->xy));
}

/* Everything up to validity and repair; r->work then holds the result. */
static st_status check_geometry(fp_run *r)
{
    st_status rc = check_kind(r);
    if (rc != ST_OK || rejected(r) || (rc = check_finite(r)) != ST_OK || rejected(r))
        return rc;
    if ((rc = st_geom_copy(&r->work, &r->f->geom)) != ST_OK)
        return rc;
    if ((rc = check_swapped(r)) != ST_OK || rejected(r))
        return rc;
    if ((rc = check_range(r)) != ST_OK || rejected(r))
        return rc;
    /* The source's area: each ring as drawn (closed implicitly), holes
    ** subtracted -- what any reader of the source would compute. */
    double perimeter;
    st_footprint_measure(r->ck, &r->work, &r->source_area, &perimeter);
    r->area = r->source_area;
    r->perimeter = r->source_perimeter = perimeter;
    r->measured_as_read = same_geom(&r->work, &r->f->geom);
    fp_scan s;
    if ((rc = st_fp_scan_rings(r->ck, &r->work, r->cfg->spike_angle_deg, &s)) != ST_OK)
        return rc;
    if ((rc = report_scan(r, &s)) != ST_OK)
        return rc;
    if ((rc = prepare_rings(r, &s)) != ST_OK || rejected(r))
        return rc;
    if (s.crosses) {
        st_fp_unwrap(&r->work);
        r->unwrapped = 1;
    }
    rc = check_validity(r);
    if (r->unwrapped)
        st_fp_rewrap(&r->work);
    return rc;
}

static st_status run_checks(fp_run *r)
{
    st_status rc = check_geometry(r);
    if (rc != ST_OK || rejected(r))
        return rc;
    /* Geodesic measures are the costliest step of a clean footprint: when
    ** 'work' is still bit for bit what was measured above, reuse them. */
    if (r->measured_as_read && same_geom(&r->work, &r->f->geom)) {
        r->area = r->source_area;
        r->perimeter = r->source_perimeter;
    } else {
        st_footprint_measure(r->ck, &r->work, &r->area, &r->perimeter);
    }
    r->area = fmax(r->area, 0.0);   /* a kept invalid source can net below 0 */
    if ((rc = check_shape(r)) != ST_OK)
        return rc;
    if (r->changed) {
        r->status = ST_STATUS_REPAIRED;
        rc = report_repair(r);
    }
    return rc;
}

/* Move the run's results into the feature and the caller's list; nothing
** is changed unless everything fits. */
static st_status commit(fp_run *r, st_feature *f, st_findings *out)
{
    char *reason = NULL;
    if (rejected(r) && !(reason = st_strdup(r->reason)))
        return ST_ERR_NOMEM;
    /* the holder of the geometry as read, made before anything changes */
    int keep_source = r->changed && !rejected(r) && !f->source_geom;
    st_geom *source = keep_source ? st_geom_new() : NULL;
    st_status rc = keep_source && !source ? ST_ERR_NOMEM : ST_OK;
    if (rc == ST_OK)
        rc = st_findings_move(out, &r->ck->scratch);
    if (rc != ST_OK) {
        st_free(source);
        st_free(reason);
        return rc;
    }
    st_free(f->reason);
    f->reason = reason;
    f->status = r->status;
    f->area_m2 = r->area;
    f->perimeter_m = r->perimeter;
    if (r->changed && !rejected(r)) {
        if (source) {
            *source = f->geom;             /* keep the geometry as read */
            f->source_geom = source;
        } else {
            st_geom_clear(&f->geom);       /* checked before: source kept */
        }
        f->geom = r->work;
        st_geom_init(&r->work);
    }
    if (f->source_geom)
        r->flags |= ST_FLAG_REPLACED;
    f->flags = r->flags;
    return ST_OK;
}

static void clear_scratch(st_findings *list)
{
    for (size_t i = 0; i < list->count; i++)
        st_free(list->items[i].message);
    list->count = 0;
}

st_status st_footprint_check(st_footprint_checker *ck, const st_footprint_config *cfg,
                             st_feature *f, st_findings *out)
{
    fp_run r;
    memset(&r, 0, sizeof r);
    r.ck = ck;
    r.cfg = cfg;
    r.f = f;
    r.status = ST_STATUS_OK;
    r.area = r.perimeter = NAN;
    st_geom_init(&r.work);
    clear_scratch(&ck->scratch);
    st_status rc = run_checks(&r);
    if (rc == ST_OK)
        rc = commit(&r, f, out);
    clear_scratch(&ck->scratch);
    if (r.final_gx)
        GEOSGeom_destroy_r(ck->gx->h, r.final_gx);
    st_geom_clear(&r.work);
    return rc;
}
