/*
** core/feature.c -- the feature record: geometry arrays, attribute values,
** layer field lists.
**
** Limits: a geometry holds at most 2^32-1 parts, rings and coordinates;
** the builder returns ST_ERR_LIMIT beyond that, never wraps around.
*/
#include <math.h>
#include <string.h>

#include "stocktake/feature.h"

const char *st_geom_type_name(st_geom_type t)
{
    static const char *const names[] = {
        "NULL", "POINT", "LINESTRING", "POLYGON", "MULTIPOINT",
        "MULTILINESTRING", "MULTIPOLYGON", "GEOMETRYCOLLECTION", "OTHER"};
    return (unsigned)t < sizeof names / sizeof names[0] ? names[t] : "OTHER";
}

void st_geom_init(st_geom *g)
{
    memset(g, 0, sizeof *g);
}

void st_geom_clear(st_geom *g)
{
    if (!g->packed) {
        st_free(g->part_ring);
        st_free(g->ring_coord);
    }
    st_free(g->xy);
    st_geom_init(g);
}

void st_geom_reset(st_geom *g)
{
    g->type = ST_GEOM_NULL;
    g->has_z = g->has_m = 0;
    g->nparts = g->nrings = g->ncoords = 0;
}

st_geom *st_geom_new(void)
{
    return st_calloc(1, sizeof(st_geom));
}

void st_geom_free(st_geom *g)
{
    if (!g)
        return;
    st_geom_clear(g);
    st_free(g);
}

int st_geom_is_empty(const st_geom *g)
{
    return g->type == ST_GEOM_NULL || g->ncoords == 0;
}

/* Grow an array of 'size'-byte items so index 'need-1' fits. */
static st_status grow(void **arr, uint32_t *cap, uint64_t need, size_t size)
{
    if (need <= *cap)
        return ST_OK;
    if (need > UINT32_MAX - 1)
        return ST_ERR_LIMIT;
    uint64_t c = *cap ? *cap : 4;
    while (c < need)
        c *= 2;
    if (c > UINT32_MAX)
        c = UINT32_MAX;
    void *p = st_realloc(*arr, (size_t)c * size);
    if (!p)
        return ST_ERR_NOMEM;
    *arr = p;
    *cap = (uint32_t)c;
    return ST_OK;
}

st_status st_geom_pack(st_geom *g)
{
    if (g->packed || g->nparts == 0 || g->nrings == 0 || g->ncoords == 0)
        return ST_OK;
    size_t nxy = 2 * (size_t)g->ncoords * sizeof *g->xy;
    size_t nparts = ((size_t)g->nparts + 1) * sizeof *g->part_ring;
    size_t nrings = ((size_t)g->nrings + 1) * sizeof *g->ring_coord;
    unsigned char *block = st_malloc(nxy + nparts + nrings);
    if (!block)
        return ST_ERR_NOMEM;
    memcpy(block, g->xy, nxy);
    memcpy(block + nxy, g->part_ring, nparts);
    memcpy(block + nxy + nparts, g->ring_coord, nrings);
    st_free(g->xy);
    st_free(g->part_ring);
    st_free(g->ring_coord);
    g->xy = (double *)(void *)block;
    g->part_ring = (uint32_t *)(void *)(block + nxy);
    g->ring_coord = (uint32_t *)(void *)(block + nxy + nparts);
    g->cap_coords = g->ncoords;
    g->cap_parts = g->nparts + 1;
    g->cap_rings = g->nrings + 1;
    g->packed = 1;
    return ST_OK;
}

/* Give a packed geometry its three arrays back, before the builder grows
** them. */
static st_status unpack(st_geom *g)
{
    st_geom copy;
    st_geom_init(&copy);
    st_status rc = st_geom_copy(&copy, g);
    if (rc != ST_OK)
        return rc;
    st_geom_clear(g);
    *g = copy;
    return ST_OK;
}

st_status st_geom_begin_part(st_geom *g)
{
    if (g->packed) {
        st_status rc = unpack(g);
        if (rc != ST_OK)
            return rc;
    }
    /* part_ring has nparts + 1 entries; keep the sentinel current. */
    st_status rc = grow((void **)&g->part_ring, &g->cap_parts,
                        (uint64_t)g->nparts + 2, sizeof *g->part_ring);
    if (rc != ST_OK)
        return rc;
    if (g->nparts == 0)
        g->part_ring[0] = g->nrings;
    g->nparts++;
    g->part_ring[g->nparts] = g->nrings;
    return ST_OK;
}

st_status st_geom_begin_ring(st_geom *g)
{
    if (g->packed) {
        st_status rc = unpack(g);
        if (rc != ST_OK)
            return rc;
    }
    if (g->nparts == 0) {
        st_status rc = st_geom_begin_part(g);
        if (rc != ST_OK)
            return rc;
    }
    st_status rc = grow((void **)&g->ring_coord, &g->cap_rings,
                        (uint64_t)g->nrings + 2, sizeof *g->ring_coord);
    if (rc != ST_OK)
        return rc;
    if (g->nrings == 0)
        g->ring_coord[0] = g->ncoords;
    g->nrings++;
    g->ring_coord[g->nrings] = g->ncoords;
    g->part_ring[g->nparts] = g->nrings;
    return ST_OK;
}

st_status st_geom_add_xy(st_geom *g, double x, double y)
{
    if (g->packed) {
        st_status rc = unpack(g);
        if (rc != ST_OK)
            return rc;
    }
    if (g->nrings == 0) {
        st_status rc = st_geom_begin_ring(g);
        if (rc != ST_OK)
            return rc;
    }
    uint32_t cap = g->cap_coords;
    st_status rc = grow((void **)&g->xy, &cap, (uint64_t)g->ncoords + 1,
                        2 * sizeof *g->xy);
    if (rc != ST_OK)
        return rc;
    g->cap_coords = cap;
    g->xy[2 * g->ncoords] = x;
    g->xy[2 * g->ncoords + 1] = y;
    g->ncoords++;
    g->ring_coord[g->nrings] = g->ncoords;
    return ST_OK;
}

st_status st_geom_copy(st_geom *dst, const st_geom *src)
{
    st_geom_clear(dst);
    dst->type = src->type;
    dst->has_z = src->has_z;
    dst->has_m = src->has_m;
    if (src->nparts == 0)
        return ST_OK;
    dst->part_ring = st_malloc(((size_t)src->nparts + 1) * sizeof *dst->part_ring);
    dst->ring_coord = st_malloc(((size_t)src->nrings + 1) * sizeof *dst->ring_coord);
    dst->xy = st_malloc(((size_t)src->ncoords * 2 + 1) * sizeof *dst->xy);
    if (!dst->part_ring || !dst->ring_coord || !dst->xy) {
        st_geom_clear(dst);
        return ST_ERR_NOMEM;
    }
    memcpy(dst->part_ring, src->part_ring, ((size_t)src->nparts + 1) * sizeof *dst->part_ring);
    /* parts without rings (a multipolygon of empty polygons): the builder
    ** has not made a ring array yet */
    if (src->ring_coord)
        memcpy(dst->ring_coord, src->ring_coord,
               ((size_t)src->nrings + 1) * sizeof *dst->ring_coord);
    else
        dst->ring_coord[0] = 0;
    if (src->ncoords)
        memcpy(dst->xy, src->xy, (size_t)src->ncoords * 2 * sizeof *dst->xy);
    dst->nparts = src->nparts;
    dst->nrings = src->nrings;
    dst->ncoords = dst->cap_coords = src->ncoords;
    dst->cap_parts = src->nparts + 1;
    dst->cap_rings = src->nrings + 1;
    return ST_OK;
}

int st_geom_bbox(const st_geom *g, double bbox[4])
{
    if (g->ncoords == 0)
        return 0;
    bbox[0] = bbox[2] = g->xy[0];
    bbox[1] = bbox[3] = g->xy[1];
    for (uint32_t i = 1; i < g->ncoords; i++) {
        double x = g->xy[2 * i], y = g->xy[2 * i + 1];
        if (x < bbox[0]) bbox[0] = x;
        if (x > bbox[2]) bbox[2] = x;
        if (y < bbox[1]) bbox[1] = y;
        if (y > bbox[3]) bbox[3] = y;
    }
    return 1;
}

double st_geom_ring_signed_area(const st_geom *g, uint32_t r)
{
    uint32_t a = g->ring_coord[r], b = g->ring_coord[r + 1];
    if (b - a < 3)
        return 0.0;
    /* Shoelace relative to the first vertex, for precision far from 0,0. */
    double x0 = g->xy[2 * a], y0 = g->xy[2 * a + 1], s = 0.0;
    for (uint32_t i = a; i + 1 < b; i++) {
        double x1 = g->xy[2 * i] - x0, y1 = g->xy[2 * i + 1] - y0;
        double x2 = g->xy[2 * i + 2] - x0, y2 = g->xy[2 * i + 3] - y0;
        s += x1 * y2 - x2 * y1;
    }
    return s / 2.0;
}

void st_geom_ring_reverse(st_geom *g, uint32_t r)
{
    uint32_t a = g->ring_coord[r], b = g->ring_coord[r + 1];
    while (b > a + 1) {
        b--;
        double tx = g->xy[2 * a], ty = g->xy[2 * a + 1];
        g->xy[2 * a] = g->xy[2 * b];
        g->xy[2 * a + 1] = g->xy[2 * b + 1];
        g->xy[2 * b] = tx;
        g->xy[2 * b + 1] = ty;
        a++;
    }
}

void st_geom_orient(st_geom *g, int ccw_shells)
{
    if (g->type != ST_GEOM_POLYGON && g->type != ST_GEOM_MULTIPOLYGON &&
        g->type != ST_GEOM_COLLECTION)
        return;
    for (uint32_t p = 0; p < g->nparts; p++)
        for (uint32_t r = g->part_ring[p]; r < g->part_ring[p + 1]; r++) {
            int shell = r == g->part_ring[p];
            double a = st_geom_ring_signed_area(g, r);
            int want_ccw = shell ? ccw_shells : !ccw_shells;
            if ((want_ccw && a < 0) || (!want_ccw && a > 0))
                st_geom_ring_reverse(g, r);
        }
}

/* ---- fields ------------------------------------------------------------ */

void st_fields_init(st_fields *f)
{
    memset(f, 0, sizeof *f);
}

void st_fields_free(st_fields *f)
{
    for (uint32_t i = 0; i < f->count; i++)
        st_free(f->items[i].name);
    st_free(f->items);
    st_fields_init(f);
}

int32_t st_fields_find(const st_fields *f, const char *name)
{
    for (uint32_t i = 0; i < f->count; i++)
        if (strcmp(f->items[i].name, name) == 0)
            return (int32_t)i;
    return -1;
}

st_status st_fields_add(st_fields *f, const char *name, st_field_type type,
                        int width, int decimals, uint32_t *index)
{
    int32_t at = st_fields_find(f, name);
    if (at >= 0) {
        if (index)
            *index = (uint32_t)at;
        return ST_OK;
    }
    st_status rc = grow((void **)&f->items, &f->cap, (uint64_t)f->count + 1,
                        sizeof *f->items);
    if (rc != ST_OK)
        return rc;
    char *copy = st_strdup(name);
    if (!copy)
        return ST_ERR_NOMEM;
    f->items[f->count] = (st_field){copy, type, width, decimals};
    if (index)
        *index = f->count;
    f->count++;
    return ST_OK;
}

st_status st_fields_copy(st_fields *dst, const st_fields *src)
{
    st_fields_free(dst);
    for (uint32_t i = 0; i < src->count; i++) {
        const st_field *s = &src->items[i];
        st_status rc = st_fields_add(dst, s->name, s->type, s->width, s->decimals, NULL);
        if (rc != ST_OK) {
            st_fields_free(dst);
            return rc;
        }
    }
    return ST_OK;
}

/* ---- features ------------------------------------------------------------ */

const char *st_provenance_name(st_provenance p)
{
    switch (p) {
    case ST_PROV_SOURCE: return "source";
    case ST_PROV_DERIVED: return "derived";
    case ST_PROV_DEFAULT: return "default";
    case ST_PROV_DRAWN: return "drawn";
    case ST_PROV_UNKNOWN: break;
    }
    return "unknown";
}

const char *st_feature_status_name(st_feature_status s)
{
    switch (s) {
    case ST_STATUS_REPAIRED: return "repaired";
    case ST_STATUS_DUPLICATE: return "duplicate";
    case ST_STATUS_REJECTED: return "rejected";
    case ST_STATUS_OK: break;
    }
    return "ok";
}

static void field_value_free_text(st_field_value *v)
{
    if (!v->borrowed)
        st_free(v->text);
}

void st_field_value_borrow(st_field_value *v, const char *text)
{
    field_value_free_text(v);
    v->text = (char *)text;   /* never written nor freed: 'borrowed' */
    v->borrowed = 1;
}

void st_field_value_take(st_field_value *v, char *text)
{
    field_value_free_text(v);
    v->text = text;
    v->borrowed = 0;
}

st_feature *st_feature_new(void)
{
    st_feature *f = st_calloc(1, sizeof *f);
    if (f)
        f->district = -1;
    return f;
}

void st_feature_free(st_feature *f)
{
    if (!f)
        return;
    st_free(f->source_id);
    st_geom_clear(&f->geom);
    st_geom_free(f->source_geom);
    for (uint32_t i = 0; !f->values_packed && i < f->nvalues; i++)
        st_free(f->values[i]);
    st_free(f->values);
    st_free(f->reason);
    for (uint32_t i = 0; i < f->nschema; i++)
        field_value_free_text(&f->schema[i]);
    st_free(f->schema);
    st_free(f);
}

/* Give each value of a packed feature its own allocation again. */
static st_status unpack_values(st_feature *f)
{
    char **v = st_calloc(f->nvalues ? f->nvalues : 1, sizeof *v);
    if (!v)
        return ST_ERR_NOMEM;
    for (uint32_t i = 0; i < f->nvalues; i++) {
        if (f->values[i] && !(v[i] = st_strdup(f->values[i]))) {
            for (uint32_t k = 0; k < i; k++)
                st_free(v[k]);
            st_free(v);
            return ST_ERR_NOMEM;
        }
    }
    st_free(f->values);
    f->values = v;
    f->values_packed = 0;
    return ST_OK;
}

st_status st_feature_pack_values(st_feature *f)
{
    if (f->values_packed || f->nvalues == 0)
        return ST_OK;
    size_t head = (size_t)f->nvalues * sizeof *f->values, bytes = head;
    for (uint32_t i = 0; i < f->nvalues; i++)
        bytes += f->values[i] ? strlen(f->values[i]) + 1 : 0;
    if (bytes > UINT32_MAX)
        return ST_OK;   /* not worth it: leave the values as they are */
    char *block = st_malloc(bytes);
    if (!block)
        return ST_ERR_NOMEM;
    char **v = (char **)(void *)block;
    char *text = block + head;
    for (uint32_t i = 0; i < f->nvalues; i++) {
        v[i] = NULL;
        if (f->values[i]) {
            size_t n = strlen(f->values[i]) + 1;
            memcpy(text, f->values[i], n);
            v[i] = text;
            text += n;
            st_free(f->values[i]);
        }
    }
    st_free(f->values);
    f->values = v;
    f->values_packed = (uint32_t)bytes;
    return ST_OK;
}

st_status st_feature_set_value(st_feature *f, uint32_t i, const char *value,
                               size_t len)
{
    if (f->values_packed) {
        st_status rc = unpack_values(f);
        if (rc != ST_OK)
            return rc;
    }
    if (i >= f->nvalues) {
        char **v = st_realloc(f->values, ((size_t)i + 1) * sizeof *v);
        if (!v)
            return ST_ERR_NOMEM;
        for (uint32_t k = f->nvalues; k <= i; k++)
            v[k] = NULL;
        f->values = v;
        f->nvalues = i + 1;
    }
    char *copy = NULL;
    if (value && !(copy = st_strndup(value, len)))
        return ST_ERR_NOMEM;
    st_free(f->values[i]);
    f->values[i] = copy;
    return ST_OK;
}

const char *st_feature_value(const st_feature *f, uint32_t i)
{
    return i < f->nvalues ? f->values[i] : NULL;
}

uint32_t st_feature_filled(const st_feature *f)
{
    uint32_t n = 0;
    for (uint32_t i = 0; i < f->nvalues; i++)
        if (f->values[i] && f->values[i][0])
            n++;
    return n;
}
