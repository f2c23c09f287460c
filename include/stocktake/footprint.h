/*
** stocktake/footprint.h -- the per-footprint stage: geometry checks,
** geodesic measures on WGS 84, and repair.
**
** Input:   one st_feature at a time, its geometry in lon/lat WGS 84 as the
**          readers return it.
** Output:  the feature's status (ok / repaired / rejected), reason, flags
**          (ST_FLAG_*), geodesic area and perimeter, possibly a repaired
**          geometry; findings appended to an st_findings list.
** Errors:  a bad footprint is never an error: it becomes a finding and,
**          where it cannot be used, status ST_STATUS_REJECTED. The check
**          itself fails only on ST_ERR_NOMEM, and then changes nothing.
** Limits:  a feature with more than ST_FOOTPRINT_MAX_COORDS coordinates
**          (or rings) is rejected unchecked (shape.too-many-vertices).
**
** Threads: an st_footprint_config is read-only while checking and may be
** shared; an st_footprint_checker (GEOS context, geodesic, scratch space)
** belongs to one thread. No global state.
**
** Defaults, reasons for every threshold, the repair method and the list of
** finding codes: docs/footprint.md and docs/findings.md.
*/
#ifndef STOCKTAKE_FOOTPRINT_H
#define STOCKTAKE_FOOTPRINT_H

#include <stddef.h>
#include <stdint.h>

#include "stocktake/core.h"
#include "stocktake/feature.h"
#include "stocktake/finding.h"

/* Hard limit on the coordinates (and on the rings) of one feature. */
#define ST_FOOTPRINT_MAX_COORDS 1000000u

/* ---- flags set in st_feature.flags ------------------------------------ */

#define ST_FLAG_NULL            (1u << 0)   /* no geometry */
#define ST_FLAG_EMPTY           (1u << 1)   /* geometry without coordinates */
#define ST_FLAG_WRONG_TYPE      (1u << 2)   /* points/lines/other, or a collection */
#define ST_FLAG_BAD_COORD       (1u << 3)   /* NaN or infinite coordinate */
#define ST_FLAG_OUT_OF_RANGE    (1u << 4)   /* |lon| > 180 or |lat| > 90 */
#define ST_FLAG_SWAPPED         (1u << 5)   /* latitude and longitude probably swapped */
#define ST_FLAG_UNCLOSED        (1u << 6)   /* a ring's last vertex is not its first */
#define ST_FLAG_TOO_FEW_POINTS  (1u << 7)   /* a ring with fewer than 3 distinct vertices */
#define ST_FLAG_INVALID         (1u << 8)   /* OGC Simple Features invalid (GEOS) */
#define ST_FLAG_REPEATED        (1u << 9)   /* consecutive repeated vertices */
#define ST_FLAG_SPIKE           (1u << 10)  /* boundary turns (almost) straight back */
#define ST_FLAG_FRAGMENT        (1u << 11)  /* area below min-area */
#define ST_FLAG_OVERSIZE        (1u << 12)  /* area above max-area */
#define ST_FLAG_SLIVER          (1u << 13)  /* compactness below min-compactness */
#define ST_FLAG_MANY_VERTICES   (1u << 14)  /* more vertices than max-vertices */
#define ST_FLAG_REPAIRED        (1u << 15)  /* geometry changed by the repair */
#define ST_FLAG_AREA_CHANGED    (1u << 16)  /* repair changed the area beyond max-area-change */
#define ST_FLAG_REPLACED        (1u << 17)  /* f->geom replaced; f->source_geom holds the source */
#define ST_FLAG_GEOS_ERROR      (1u << 18)  /* GEOS could not process the geometry */

/* Append the names of the set flags, comma-separated ("invalid,repaired"),
** to 'out'; nothing when no flag is set. */
st_status st_footprint_flag_names(uint32_t flags, st_buf *out) ST_MUST_CHECK;

/* ---- finding codes ------------------------------------------------------ */

/* Every finding this stage writes. Names ("geom.null", ...) through
** st_footprint_code_name(); meanings in docs/findings.md. */
typedef enum {
    ST_FP_NULL = 0,              /* geom.null */
    ST_FP_EMPTY,                 /* geom.empty */
    ST_FP_WRONG_TYPE,            /* geom.wrong-type */
    ST_FP_COLLECTION,            /* geom.collection */
    ST_FP_BAD_COORD,             /* geom.bad-coordinate */
    ST_FP_OUT_OF_RANGE,          /* geom.out-of-range */
    ST_FP_SWAPPED,               /* geom.swapped-axes */
    ST_FP_UNCLOSED,              /* geom.unclosed-ring */
    ST_FP_TOO_FEW_POINTS,        /* geom.too-few-points */
    ST_FP_SELF_INTERSECTION,     /* geom.self-intersection */
    ST_FP_RING_SELF_INTERSECTION,/* geom.ring-self-intersection */
    ST_FP_HOLE_OUTSIDE_SHELL,    /* geom.hole-outside-shell */
    ST_FP_NESTED_HOLES,          /* geom.nested-holes */
    ST_FP_DISCONNECTED_INTERIOR, /* geom.disconnected-interior */
    ST_FP_NESTED_SHELLS,         /* geom.nested-shells */
    ST_FP_DUPLICATE_RINGS,       /* geom.duplicate-rings */
    ST_FP_INVALID_OTHER,         /* geom.invalid */
    ST_FP_GEOS_ERROR,            /* geom.geos-error */
    ST_FP_REPEATED,              /* geom.repeated-vertex */
    ST_FP_SPIKE,                 /* geom.spike */
    ST_FP_FRAGMENT,              /* shape.fragment */
    ST_FP_OVERSIZE,              /* shape.oversize */
    ST_FP_SLIVER,                /* shape.sliver */
    ST_FP_MANY_VERTICES,         /* shape.too-many-vertices */
    ST_FP_REPAIRED,              /* repair.applied */
    ST_FP_PARTS_DROPPED,         /* repair.parts-dropped */
    ST_FP_AREA_CHANGED,          /* repair.area-changed */
    ST_FP_REPAIR_FAILED,         /* repair.failed */
    ST_FP_NCODES
} st_fp_code;

/* Static name of a code ("geom.self-intersection"); "" when out of range. */
const char *st_footprint_code_name(st_fp_code c);
/* Code called 'name', or -1. */
int st_footprint_code_find(const char *name);

/* ---- configuration -------------------------------------------------------- */

typedef enum {
    ST_REPAIR_MAKE_VALID = 0,  /* repair (GEOS MakeValid), status REPAIRED */
    ST_REPAIR_REJECT,          /* invalid -> REJECTED */
    ST_REPAIR_KEEP             /* flag only; status stays OK where usable */
} st_repair_policy;

typedef enum {
    ST_REPAIR_STRUCTURE = 0,   /* GEOS_MAKE_VALID_STRUCTURE (default) */
    ST_REPAIR_LINEWORK         /* GEOS_MAKE_VALID_LINEWORK */
} st_repair_method;

/*
** Every threshold of the stage. A plain value: copy it, share it read-only
** between threads. Values and their reasons: docs/footprint.md. A zero
** max_area_m2 or max_vertices switches that check off.
*/
typedef struct st_footprint_config {
    double min_area_m2;       /* below: shape.fragment; also the part size a
                                 repair drops */
    double max_area_m2;       /* above: shape.oversize (0 = off) */
    double min_compactness;   /* 4*pi*A/P^2 below: shape.sliver */
    uint32_t max_vertices;    /* above: shape.too-many-vertices (0 = off) */
    double spike_angle_deg;   /* a vertex whose two edges meet at less than
                                 this angle is a spike */
    double max_area_change;   /* fraction; a repair changing the area more
                                 gives repair.area-changed */
    st_repair_policy repair;
    st_repair_method method;
    st_severity severity[ST_FP_NCODES];  /* severity of each finding code */
} st_footprint_config;

/* The documented defaults (docs/footprint.md). */
st_footprint_config st_footprint_config_default(void);

/*
** Set one numeric setting by name, as a rule file's footprint block says
** it ("min-area", 6, "m2"). Names and units:
**   min-area, max-area   m2 | ha | km2
**   min-compactness      "" (or NULL), 0..1
**   max-vertices         "" (or NULL), whole number >= 4, or 0 = off
**   spike-angle          deg, 0..90
**   max-area-change      %, 0..100
** 'sev' (borrowed; NULL keeps the current one) becomes the severity of the
** finding the setting controls. Unknown name, wrong unit or a value out of
** range: ST_ERR_USAGE, 'cfg' unchanged, and 'err' (may be NULL) says why.
*/
st_status st_footprint_config_set(st_footprint_config *cfg, const char *name,
                                  double value, const char *unit,
                                  const st_severity *sev,
                                  char *err, size_t errlen) ST_MUST_CHECK;
/*
** Set a keyword setting: "repair" = make-valid | reject | keep;
** "repair-method" = structure | linework. Errors as st_footprint_config_set.
*/
st_status st_footprint_config_set_word(st_footprint_config *cfg, const char *name,
                                       const char *word,
                                       char *err, size_t errlen) ST_MUST_CHECK;
/* Set the severity of one finding code by its name ("geom.spike"). */
st_status st_footprint_config_set_severity(st_footprint_config *cfg,
                                           const char *code, st_severity sev,
                                           char *err, size_t errlen) ST_MUST_CHECK;
/* "make-valid", "reject", "keep" / "structure", "linework". */
const char *st_repair_policy_name(st_repair_policy p);
const char *st_repair_method_name(st_repair_method m);

/* ---- layer extent (for swapped latitude/longitude) ---------------------- */

/*
** A layer's robust extent in lon/lat: Tukey's fences (quartiles -/+ 1.5
** interquartile ranges, padded to at least ST_FOOTPRINT_EXTENT_PAD degrees)
** of one representative point per feature, so a few misplaced features do
** not stretch it. valid = 0 when there were too few points to say.
*/
#define ST_FOOTPRINT_EXTENT_MIN_POINTS 5
#define ST_FOOTPRINT_EXTENT_PAD 0.01

typedef struct st_footprint_extent {
    double xmin, ymin, xmax, ymax;
    int valid;
} st_footprint_extent;

/* Representative point of g: the centre of the bounding box of its finite
** coordinates. Returns 0 (xy untouched) when g has none. g borrowed. */
int st_footprint_center(const st_geom *g, double xy[2]);
/*
** Robust extent of n points xy[2*i], xy[2*i+1] (borrowed); non-finite
** points are ignored. Fewer than ST_FOOTPRINT_EXTENT_MIN_POINTS usable
** points give out->valid = 0 and ST_OK. ST_ERR_NOMEM on no memory.
** Layers that straddle the antimeridian are not handled (their extent
** spans the globe, so nothing is flagged).
*/
st_status st_footprint_extent_compute(const double *xy, size_t n,
                                      st_footprint_extent *out) ST_MUST_CHECK;

/* ---- the checker ---------------------------------------------------------- */

typedef struct st_footprint_checker st_footprint_checker;

/* Returns owned checker in *out (NULL on failure: ST_ERR_NOMEM);
** free with st_footprint_checker_free. One per thread. */
st_status st_footprint_checker_new(st_footprint_checker **out) ST_MUST_CHECK;
void st_footprint_checker_free(st_footprint_checker *ck);
/* The extent of the layer whose features come next (copied; NULL or an
** invalid extent switches the swapped-axes check off). */
void st_footprint_checker_set_extent(st_footprint_checker *ck,
                                     const st_footprint_extent *ext);

/*
** Check one feature (borrowed; modified in place) under 'cfg' (borrowed).
** Sets f->status (OK, REPAIRED or REJECTED), f->reason (owned by f; why
** rejected, else NULL), f->flags, f->area_m2 and f->perimeter_m (NAN when
** the geometry cannot be measured), and appends this feature's findings
** (bid = f->bid) to 'out'. When the geometry is changed, f->geom receives
** the new geometry, the geometry as read moves to f->source_geom and
** ST_FLAG_REPLACED is set; a rejected feature keeps its geometry as read.
** Returns ST_OK, or ST_ERR_NOMEM: then f and out are as they were.
*/
st_status st_footprint_check(st_footprint_checker *ck, const st_footprint_config *cfg,
                             st_feature *f, st_findings *out) ST_MUST_CHECK;

/*
** 1 when the swapped-axes check could fire on f (borrowed) under the
** extent 'ext' (borrowed): the centre of its geometry as read lies outside
** a valid extent and the swapped centre inside. A feature for which this
** is 0 gets the same outcome from st_footprint_check with or without the
** extent set; so a stage may check features before their layer's extent
** is known and check again only those for which this is 1 (after
** st_footprint_reset).
*/
int st_footprint_swap_suspect(const st_footprint_extent *ext, const st_feature *f);
/* Undo a check on f (borrowed; modified): the geometry as read back in
** f->geom, status OK, no reason, flags, area or perimeter. Its findings
** are the caller's to drop. Attributes and schema values are untouched. */
void st_footprint_reset(st_feature *f);

/* The geometry as read: f->source_geom when the check replaced f->geom,
** else f->geom. Borrowed from f. */
const st_geom *st_footprint_source_geom(const st_feature *f);

/* ---- measures ------------------------------------------------------------- */

/*
** Geodesic area (m^2) and perimeter (m) of g (borrowed) on WGS 84, with
** geod_polygonarea's algorithm ring by ring: each polygon counts
** |shell| - sum |holes|, whatever the rings' orientation; the perimeter is
** the length of the shells (the outline; holes add none -- the same
** convention as pyproj's Geod.geometry_area_perimeter). Works across the
** antimeridian and near the poles. A non-polygonal, null or empty g gives 0 and 0; a ring with a
** non-finite coordinate gives NAN.
*/
void st_footprint_measure(const st_footprint_checker *ck, const st_geom *g,
                          double *area_m2, double *perimeter_m);
/* Isoperimetric quotient 4*pi*A/P^2 (1 for a circle); NAN when P <= 0. */
double st_footprint_compactness(double area_m2, double perimeter_m);

#endif
