/*
** neighbours/neighboursInt.h -- what the files of the neighbour stage
** share: the stage state, the pair record a scan produces, the canonical
** form of a footprint, and message helpers. Not part of the public API.
*/
#ifndef STOCKTAKE_NEIGHBOURS_INT_H
#define STOCKTAKE_NEIGHBOURS_INT_H

#include <geodesic.h>

#include "stocktake/neighbours.h"

struct st_neighbours {
    st_neighbours_config cfg;
    st_neighbours_input in;     /* borrowed */
    st_geos *gx;                /* borrowed; the context the tree belongs to */
    uint32_t *items;            /* index position -> position in in.features,
                                   in (layer, index) order; owned */
    uint32_t count;
    GEOSSTRtree *tree;          /* envelopes; item = index position + 1 */
    struct geod_geodesic geod;  /* WGS 84, read-only after begin() */
};

/* What a scan decided about one pair; finish() turns it into findings. */
typedef enum {
    NB_NEAR = 1,     /* IoU >= near_iou */
    NB_PARTIAL,      /* share >= overlap_share, m² >= overlap_min_m2 */
    NB_CONTAINED     /* share >= contained_share, m² >= overlap_min_m2 */
} nb_kind;

typedef struct nb_pair {
    uint32_t a, b;      /* index positions, a < b */
    uint32_t kind;      /* nb_kind */
    uint32_t smaller;   /* index position of the smaller footprint (a or b) */
    double iou;         /* intersection over union */
    double share;       /* intersection / smaller area */
    double m2;          /* geodesic area of the intersection, 0 for NB_NEAR */
    double x, y;        /* a point inside the intersection (lon/lat) */
} nb_pair;

struct st_neighbours_pairs {
    nb_pair *items;
    size_t count, cap;
};

/* ---- canonical form (nb_canon.c) -------------------------------------- */

/*
** The canonical form of a footprint as 64-bit words: part count, then per
** part its ring count, then per ring its vertex count and the coordinates'
** bit patterns. Rings are oriented (shells counter-clockwise, holes
** clockwise), start at their smallest vertex, lose the closing vertex;
** holes and parts are sorted. The arrays are scratch reused between calls.
*/
typedef struct st_nb_canon {
    uint64_t *words;
    size_t nwords, cap_words;
    double *xy;                 /* canonical rings at their source offsets */
    uint32_t *len;              /* vertices per canonical ring */
    uint32_t *ring_order, *part_order, *tmp;
    size_t cap_xy, cap_rings, cap_parts, cap_tmp;
} st_nb_canon;

void st_nb_canon_init(st_nb_canon *c);
void st_nb_canon_free(st_nb_canon *c);
/* Canonical form of g (borrowed) into c. ST_OK or ST_ERR_NOMEM. */
st_status st_nb_canon_build(st_nb_canon *c, const st_geom *g) ST_MUST_CHECK;
uint64_t st_nb_canon_hash(const st_nb_canon *c);
int st_nb_canon_equal(const st_nb_canon *a, const st_nb_canon *b);

/* ---- messages (neighbours.c) ------------------------------------------ */

/* "building 12 (layer 0, feature 5, id 2358)" into buf (always terminated). */
void st_nb_describe(const st_neighbours *nb, const st_feature *f,
                    char *buf, size_t n);

/*
** Set 'dup' aside as a duplicate of 'keeper': status, duplicate_of and a
** reason naming the keeper, the kind ("exact duplicate", "near-duplicate"),
** 'detail' (may be "") and why the keeper was kept. ST_OK or ST_ERR_NOMEM.
*/
st_status st_nb_set_aside(const st_neighbours *nb, st_feature *dup,
                          const st_feature *keeper, const char *kind,
                          const char *detail) ST_MUST_CHECK;

/* Why 'keeper' was kept over 'dup' ("more filled attributes (3 against 1)"). */
void st_nb_why_kept(const st_feature *keeper, const st_feature *dup,
                    char *buf, size_t n);

/* 1 if keeper rule prefers feature a over b: more filled attributes, then
** the first read (a and b are index-order positions: lower is first). */
int st_nb_prefer(const st_feature *a, uint32_t pos_a, const st_feature *b,
                 uint32_t pos_b);

#endif
