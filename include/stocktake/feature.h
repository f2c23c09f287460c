/*
** stocktake/feature.h -- the one feature record that flows through every
** stage: geometry as plain coordinate arrays, source attributes as UTF-8
** strings, and (filled by later stages) measures, status and schema values
** with their provenance.
**
** Geometry is kept out of GEOS on purpose: a GEOS geometry belongs to the
** context that made it, while a feature moves between threads. Stages build
** GEOS geometries from st_geom with their own context (st_geom_to_geos) and
** free them before passing the feature on.
**
** Layout of st_geom, for every type:
**   parts   -- polygons of a (multi)polygon; lines of a (multi)linestring;
**              points of a (multi)point (each point is a one-coordinate ring)
**   rings   -- part p owns rings [part_ring[p], part_ring[p+1]); for a
**              polygon the first is the shell, the rest are holes
**   coords  -- ring r owns coordinates [ring_coord[r], ring_coord[r+1]),
**              stored as x,y pairs in 'xy' (lon/lat after reading)
** A null geometry has type ST_GEOM_NULL; an empty one a type and 0 parts.
*/
#ifndef STOCKTAKE_FEATURE_H
#define STOCKTAKE_FEATURE_H

#include <stdint.h>
#include "stocktake/core.h"

typedef enum {
    ST_GEOM_NULL = 0,
    ST_GEOM_POINT,
    ST_GEOM_LINESTRING,
    ST_GEOM_POLYGON,
    ST_GEOM_MULTIPOINT,
    ST_GEOM_MULTILINESTRING,
    ST_GEOM_MULTIPOLYGON,
    ST_GEOM_COLLECTION,  /* only its polygonal members are kept (as parts) */
    ST_GEOM_OTHER        /* curves, surfaces, TINs...: nothing is kept; as a
                            layer's declared type: any geometry ("GEOMETRY") */
} st_geom_type;

/* Upper-case OGC name ("POLYGON"), "NULL" for ST_GEOM_NULL. */
const char *st_geom_type_name(st_geom_type t);

typedef struct st_geom {
    st_geom_type type;
    uint8_t has_z;         /* the source had Z (dropped: footprints are 2-D) */
    uint8_t has_m;         /* the source had M (dropped) */
    uint8_t packed;        /* 1: the three arrays share the block of 'xy'
                              (st_geom_pack); freed with it */
    uint32_t nparts, nrings, ncoords;
    uint32_t cap_parts, cap_rings, cap_coords;  /* builder capacities */
    uint32_t *part_ring;   /* nparts + 1 entries, owned */
    uint32_t *ring_coord;  /* nrings + 1 entries, owned */
    double *xy;            /* 2 * ncoords, owned */
} st_geom;                 /* 56 bytes: counts before pointers, no padding */

void st_geom_init(st_geom *g);        /* ST_GEOM_NULL, no memory */
/* Returns owned ST_GEOM_NULL geometry (NULL on no memory); free with
** st_geom_free, which frees its arrays too (NULL: no-op). */
st_geom *st_geom_new(void);
void st_geom_free(st_geom *g);
void st_geom_clear(st_geom *g);       /* frees arrays, back to NULL type */
void st_geom_reset(st_geom *g);       /* no coordinates, NULL type; keeps arrays */
int st_geom_is_empty(const st_geom *g);
/* Builder: start a part, start a ring in the current part, add a vertex. */
st_status st_geom_begin_part(st_geom *g) ST_MUST_CHECK;
st_status st_geom_begin_ring(st_geom *g) ST_MUST_CHECK;
st_status st_geom_add_xy(st_geom *g, double x, double y) ST_MUST_CHECK;
/*
** Move the arrays into one block trimmed to size (the coordinates, then the
** part and ring offsets): one heap block instead of three, for geometries
** held by the million (docs/performance.md). Reads the same; the builder
** functions above unpack a packed geometry before they add to it. Nothing
** to do for a geometry without coordinates. On ST_ERR_NOMEM nothing
** changes.
*/
st_status st_geom_pack(st_geom *g) ST_MUST_CHECK;
/* Deep copy into 'dst' (which is cleared first). */
st_status st_geom_copy(st_geom *dst, const st_geom *src) ST_MUST_CHECK;
/* Bounding box of all coordinates; returns 0 when there are none. */
int st_geom_bbox(const st_geom *g, double bbox[4]);
/* Signed planar area of ring r (shoelace; counter-clockwise positive). */
double st_geom_ring_signed_area(const st_geom *g, uint32_t r);
/* Reverse the vertex order of ring r. */
void st_geom_ring_reverse(st_geom *g, uint32_t r);
/* Orient rings: shells counter-clockwise and holes clockwise when ccw_shells,
** the reverse otherwise (Shapefile wants clockwise shells). */
void st_geom_orient(st_geom *g, int ccw_shells);

/* ---- attribute schema of a layer -------------------------------------- */

typedef enum {
    ST_FIELD_TEXT = 0,
    ST_FIELD_INTEGER,
    ST_FIELD_REAL,
    ST_FIELD_BOOLEAN,
    ST_FIELD_JSON      /* nested object or array kept as JSON text */
} st_field_type;

typedef struct st_field {
    char *name;        /* UTF-8, owned */
    st_field_type type;
    int width;         /* source width where the format has one, else 0 */
    int decimals;
} st_field;

typedef struct st_fields {
    st_field *items;
    uint32_t count, cap;
} st_fields;

void st_fields_init(st_fields *f);
void st_fields_free(st_fields *f);
/* Index of the field called 'name', or -1. */
int32_t st_fields_find(const st_fields *f, const char *name);
/* Adds a field (name borrowed and copied); *index gets its position.
** An existing name is not added twice: its index is returned. */
st_status st_fields_add(st_fields *f, const char *name, st_field_type type,
                        int width, int decimals, uint32_t *index) ST_MUST_CHECK;
st_status st_fields_copy(st_fields *dst, const st_fields *src) ST_MUST_CHECK;

/* ---- the feature -------------------------------------------------------- */

/* Where a schema field's value came from (DESIGN.md, precedence order). */
typedef enum {
    ST_PROV_UNKNOWN = 0,
    ST_PROV_DRAWN,
    ST_PROV_DEFAULT,
    ST_PROV_DERIVED,
    ST_PROV_SOURCE
} st_provenance;

const char *st_provenance_name(st_provenance p);  /* "source", ... */

typedef struct st_field_value {
    char *text;            /* UTF-8, NULL while unknown; owned unless
                              'borrowed' */
    st_provenance from;
    uint32_t borrowed;     /* 1: 'text' is a string of the rule set or of
                              the defaults (a code, an unknown value, a
                              default), which outlive the feature's use of
                              it, as 'rule' does: not freed with the value.
                              Most values are such codes; a copy of each
                              would cost a heap block a value
                              (docs/performance.md, memory per footprint). */
    const char *rule;      /* "file:line" owned by the rule set, or NULL */
} st_field_value;

/* v's text becomes 'text' (borrowed: it must outlive v's use of it, and is
** never freed through v), after v's own text, if any, is freed. */
void st_field_value_borrow(st_field_value *v, const char *text);
/* v's text becomes 'text' (takes ownership; NULL: none), after v's own
** text, if any, is freed. */
void st_field_value_take(st_field_value *v, char *text);

typedef enum {
    ST_STATUS_OK = 0,      /* kept as read */
    ST_STATUS_REPAIRED,    /* kept, geometry repaired */
    ST_STATUS_DUPLICATE,   /* set aside: duplicate of another building */
    ST_STATUS_REJECTED     /* set aside: unusable geometry */
} st_feature_status;

const char *st_feature_status_name(st_feature_status s);

/* A million of these are held at once (docs/performance.md, memory per
** footprint): the members are ordered so that the record has no padding
** (168 bytes, one 176-byte heap block). */
typedef struct st_feature {
    uint32_t layer;        /* index of the input layer in the run */
    uint32_t nvalues;      /* number of entries in 'values' */
    uint64_t index;        /* 0-based position within its layer as read */
    char *source_id;       /* the layer's own id (GeoJSON id, gpkg fid,
                              shapefile record number), owned, or NULL */
    st_geom geom;          /* lon/lat WGS 84 once the reader returns it */
    st_geom *source_geom;  /* the geometry as read, kept only when a stage
                              replaced 'geom' (footprint repair); NULL
                              otherwise. Owned: a pointer rather than a
                              second st_geom in the record, since few
                              features need it. */
    char **values;         /* nvalues source attributes, owned, NULL = missing;
                              values[i] belongs to field i of its layer */
    uint32_t values_packed;/* 0, or: the strings live in the block of
                              'values' itself (st_feature_pack_values) and
                              are not freed one by one */

    /* Filled by later stages. */
    st_feature_status status;
    uint64_t bid;          /* stable building id */
    char *reason;          /* owned; why set aside, or NULL */
    uint64_t duplicate_of; /* bid of the kept member, for ST_STATUS_DUPLICATE */
    double area_m2, perimeter_m;
    uint32_t flags;        /* ST_FLAG_* bits set by the footprint stage */
    int32_t district;      /* index in the district layer, -1 = none */
    st_field_value *schema;/* one per schema field, owned, NULL without rules */
    uint32_t nschema;
} st_feature;

/* Returns owned empty feature (NULL on no memory); free with st_feature_free. */
st_feature *st_feature_new(void);
void st_feature_free(st_feature *f);
/* Sets attribute i (value borrowed and copied; NULL = missing), growing the
** value array as needed. */
st_status st_feature_set_value(st_feature *f, uint32_t i, const char *value,
                               size_t len) ST_MUST_CHECK;
/*
** Move the source attributes into one block (the pointer array followed by
** the strings): one allocation instead of one per value, for features held
** by the million (docs/performance.md). Values read the same; a later
** st_feature_set_value unpacks first. On ST_ERR_NOMEM nothing changes.
*/
st_status st_feature_pack_values(st_feature *f) ST_MUST_CHECK;
/* Attribute i or NULL when missing or beyond the feature's values. */
const char *st_feature_value(const st_feature *f, uint32_t i);
/* Number of non-empty source attributes (used to choose among duplicates). */
uint32_t st_feature_filled(const st_feature *f);

#endif
