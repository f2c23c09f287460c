/*
** place/districts.c -- reading the district layer: keys, parent regions,
** polygons checked and, where invalid, repaired with GEOSMakeValid.
**
** Input:   any layer the readers open (already lon/lat WGS 84).
** Output:  an st_districts set: one st_district per distinct key, in the
**          order keys are first read, with plain st_geom polygons.
** Errors:  the reader's; ST_ERR_USAGE for a key/region field the layer lacks
**          or a reserved key; ST_ERR_FORMAT for a feature without a key or
**          a polygon GEOS cannot build; each with one diagnostic naming the
**          file and the feature. Repairs are warning diagnostics.
** Limits:  ST_PLACE_MAX_DISTRICTS features, ST_PLACE_MAX_KEY bytes a key.
*/
#include <string.h>

#include "placeInt.h"
#include "stocktake/io.h"

typedef struct loader {
    const st_districts_options *opt;
    st_diags *diags;
    st_districts *d;
    st_feature **fs;          /* every feature read */
    size_t nfs, capfs;
    st_geos *gx;
    int32_t key, region;      /* field indices; region -1 when none */
} loader;

static st_status read_all(loader *L, st_reader *r)
{
    for (;;) {
        st_feature *f = NULL;
        st_status rc = st_reader_next(r, &f);
        if (rc != ST_OK || !f)
            return rc;
        if (L->nfs == ST_PLACE_MAX_DISTRICTS) {
            st_feature_free(f);
            st_loc loc = ST_LOC_FEATURE(L->opt->path, (long long)L->nfs);
            return st_diags_add(L->diags, ST_SEV_ERROR, ST_ERR_LIMIT, &loc,
                                "more than %u district features", ST_PLACE_MAX_DISTRICTS);
        }
        if (L->nfs == L->capfs) {
            size_t cap = L->capfs ? 2 * L->capfs : 256;
            st_feature **a = st_realloc(L->fs, cap * sizeof *a);
            if (!a) {
                st_feature_free(f);
                return ST_ERR_NOMEM;
            }
            L->fs = a;
            L->capfs = cap;
        }
        L->fs[L->nfs++] = f;
    }
}

/* A value counts as filled when it has a byte other than a space. */
static const char *filled(const st_feature *f, int32_t field)
{
    const char *v = field >= 0 ? st_feature_value(f, (uint32_t)field) : NULL;
    if (!v)
        return NULL;
    for (const char *p = v; *p; p++)
        if (*p != ' ')
            return v;
    return NULL;
}

/* 1 if field i is filled on every feature, with values all distinct. */
static st_status fit_as_key(loader *L, int32_t field, int *fits)
{
    *fits = L->nfs > 0;
    st_strtab *seen = st_strtab_new(0, 0);
    if (!seen)
        return ST_ERR_NOMEM;
    st_status rc = ST_OK;
    for (size_t i = 0; *fits && i < L->nfs; i++) {
        const char *v = filled(L->fs[i], field);
        int added = 0;
        uint32_t id;
        if (!v)
            *fits = 0;
        else if ((rc = st_strtab_intern(seen, v, strlen(v), &id, &added)) != ST_OK)
            break;
        else if (!added)
            *fits = 0;
    }
    st_strtab_free(seen);
    return rc;
}

static st_status field_named(loader *L, const st_fields *fields, const char *name,
                             const char *option, int32_t *out)
{
    *out = st_fields_find(fields, name);
    if (*out >= 0)
        return ST_OK;
    st_buf list;
    st_buf_init(&list, 4096);
    for (uint32_t i = 0; i < fields->count; i++)
        if (st_buf_printf(&list, "%s'%s'", i ? ", " : "", fields->items[i].name) != ST_OK)
            break;
    st_loc loc = ST_LOC_FILE(L->opt->path);
    st_diags_add(L->diags, ST_SEV_ERROR, ST_ERR_USAGE, &loc,
                 "%s: the layer has no field '%s' (its fields: %s)", option, name,
                 list.len ? list.data : "none");
    st_buf_free(&list);
    return ST_ERR_USAGE;
}

static st_status resolve_fields(loader *L, const st_fields *fields)
{
    st_status rc = ST_OK;
    L->region = -1;
    if (L->opt->key)
        rc = field_named(L, fields, L->opt->key, "--district-key", &L->key);
    else {
        L->key = -1;
        for (uint32_t i = 0; rc == ST_OK && L->key < 0 && i < fields->count; i++) {
            int fits = 0;
            rc = fit_as_key(L, (int32_t)i, &fits);
            if (fits)
                L->key = (int32_t)i;
        }
        if (rc == ST_OK && L->key < 0) {
            st_loc loc = ST_LOC_FILE(L->opt->path);
            return st_diags_add(L->diags, ST_SEV_ERROR, ST_ERR_USAGE, &loc,
                                "no field is filled with a distinct value on every "
                                "district: name the key with --district-key");
        }
    }
    if (rc == ST_OK && L->opt->region_key)
        rc = field_named(L, fields, L->opt->region_key, "--region-key", &L->region);
    if (rc == ST_OK) {
        L->d->key_field = st_strdup(fields->items[L->key].name);
        if (!L->d->key_field)
            return ST_ERR_NOMEM;
        if (L->region >= 0 && !(L->d->region_field = st_strdup(fields->items[L->region].name)))
            return ST_ERR_NOMEM;
    }
    return rc;
}

/* The key of feature i, checked; NULL with a diagnostic when unusable. */
static const char *key_of(loader *L, size_t i, st_status *rc)
{
    const st_feature *f = L->fs[i];
    const char *k = filled(f, L->key);
    st_loc loc = ST_LOC_FEATURE(L->opt->path, (long long)f->index);
    if (!k)
        *rc = st_diags_add(L->diags, ST_SEV_ERROR, ST_ERR_FORMAT, &loc,
                           "district has no value for its key field '%s'", L->d->key_field);
    else if (strlen(k) > ST_PLACE_MAX_KEY)
        *rc = st_diags_add(L->diags, ST_SEV_ERROR, ST_ERR_LIMIT, &loc,
                           "district key longer than %u bytes", ST_PLACE_MAX_KEY);
    else if (!strcmp(k, ST_PLACE_NONE))
        *rc = st_diags_add(L->diags, ST_SEV_ERROR, ST_ERR_USAGE, &loc,
                           "district key '%s' is reserved for buildings outside every district",
                           ST_PLACE_NONE);
    else
        return k;
    return NULL;
}

/* Append the polygons of 'src' as parts of 'dst' (a merged district). */
static st_status append_parts(st_geom *dst, const st_geom *src)
{
    for (uint32_t p = 0; p < src->nparts; p++) {
        st_status rc = st_geom_begin_part(dst);
        for (uint32_t r = src->part_ring[p]; rc == ST_OK && r < src->part_ring[p + 1]; r++) {
            rc = st_geom_begin_ring(dst);
            for (uint32_t c = src->ring_coord[r]; rc == ST_OK && c < src->ring_coord[r + 1]; c++)
                rc = st_geom_add_xy(dst, src->xy[2 * c], src->xy[2 * c + 1]);
        }
        if (rc != ST_OK)
            return rc;
    }
    if (dst->nparts > 1)
        dst->type = ST_GEOM_MULTIPOLYGON;
    return ST_OK;
}

static int polygonal(st_geom_type t)
{
    return t == ST_GEOM_POLYGON || t == ST_GEOM_MULTIPOLYGON || t == ST_GEOM_COLLECTION;
}

/* Check d's polygon; repair it in place when GEOS finds it invalid. */
static st_status check_polygon(loader *L, st_district *d, const char *what)
{
    st_geom *g = &d->geom;
    if (!g->nparts)
        return ST_OK;
    char err[256] = "";
    st_geos_clear_error(L->gx);
    GEOSContextHandle_t h = L->gx->h;
    GEOSGeometry *gg = st_geom_to_geos(L->gx, g, err, sizeof err);
    st_loc loc = ST_LOC_FEATURE(L->opt->path, (long long)d->feature);
    if (!gg)
        return st_diags_add(L->diags, ST_SEV_ERROR, ST_ERR_FORMAT, &loc,
                            "%s: cannot build its polygon: %s", what, err);
    char *why = NULL;
    GEOSGeometry *where = NULL;
    char valid = GEOSisValidDetail_r(h, gg, 0, &why, &where);
    st_status rc = ST_OK;
    if (valid != 1) {
        double x = 0, y = 0;
        if (where) {
            GEOSGeomGetX_r(h, where, &x);
            GEOSGeomGetY_r(h, where, &y);
        }
        GEOSGeometry *fixed = GEOSMakeValid_r(h, gg);
        rc = fixed ? st_geom_from_geos(L->gx, fixed, g) : ST_ERR_GEOS;
        if (fixed)
            GEOSGeom_destroy_r(h, fixed);
        if (rc == ST_OK) {
            g->type = g->nparts > 1 ? ST_GEOM_MULTIPOLYGON : ST_GEOM_POLYGON;
            d->repair = why ? st_strdup_printf("%s at (%.9g %.9g)", why, x, y)
                            : st_strdup("GEOS could not check it");
            rc = d->repair ? ST_OK : ST_ERR_NOMEM;
        }
        if (rc == ST_OK) {
            L->d->nrepaired++;
            st_diags_add(L->diags, ST_SEV_WARNING, ST_OK, &loc,
                         "%s: invalid polygon (%s): repaired with GEOSMakeValid", what,
                         d->repair);
        } else if (rc == ST_ERR_GEOS)
            st_diags_add(L->diags, ST_SEV_ERROR, rc, &loc, "%s: GEOSMakeValid failed: %s",
                         what, L->gx->last_error);
    }
    if (why)
        GEOSFree_r(h, why);
    if (where)
        GEOSGeom_destroy_r(h, where);
    GEOSGeom_destroy_r(h, gg);
    return rc;
}

static st_status grow_districts(st_districts *d)
{
    if (d->n < d->cap)
        return ST_OK;
    size_t cap = d->cap ? 2 * d->cap : 64;
    st_district *a = st_realloc(d->items, cap * sizeof *a);
    if (!a)
        return ST_ERR_NOMEM;
    d->items = a;
    d->cap = cap;
    return ST_OK;
}

/* One feature into its district (new, or merged with an earlier same key). */
static st_status add_feature(loader *L, size_t i)
{
    st_status rc = ST_OK;
    const char *key = key_of(L, i, &rc);
    if (!key)
        return rc;
    st_feature *f = L->fs[i];
    st_loc loc = ST_LOC_FEATURE(L->opt->path, (long long)f->index);
    if (f->geom.type != ST_GEOM_NULL && !polygonal(f->geom.type))
        return st_diags_add(L->diags, ST_SEV_ERROR, ST_ERR_FORMAT, &loc,
                            "district '%s' is a %s, not a polygon", key,
                            st_geom_type_name(f->geom.type));
    if (!f->geom.nparts)
        st_diags_add(L->diags, ST_SEV_WARNING, ST_OK, &loc,
                     "district '%s' has no polygon: no building can be placed in it", key);
    st_districts *D = L->d;
    uint32_t id;
    int added = 0;
    rc = grow_districts(D);
    if (rc == ST_OK)
        rc = st_strtab_intern(D->index, key, strlen(key), &id, &added);
    if (rc != ST_OK)
        return rc;
    if (!added) {
        st_district *d = &D->items[id];
        d->nfeatures++;
        st_diags_add(L->diags, ST_SEV_WARNING, ST_OK, &loc,
                     "district key '%s' also names feature %llu: both are one district", key,
                     (unsigned long long)d->feature);
        const char *reg = filled(f, L->region);
        int same = reg && d->region ? !strcmp(reg, d->region) : !reg && !d->region;
        if (L->region >= 0 && !same)
            st_diags_add(L->diags, ST_SEV_WARNING, ST_OK, &loc,
                         "district '%s': region '%s' differs from its first feature's; "
                         "the first is kept", key, reg ? reg : "");
        return append_parts(&d->geom, &f->geom);
    }
    st_district *d = &D->items[D->n];
    memset(d, 0, sizeof *d);
    st_geom_init(&d->geom);
    d->feature = f->index;
    d->nfeatures = 1;
    D->n++;
    d->key = st_strdup(key);
    const char *reg = filled(f, L->region);
    if (!d->key || (reg && !(d->region = st_strdup(reg))))
        return ST_ERR_NOMEM;
    if (reg && strlen(reg) > ST_PLACE_MAX_KEY)
        return st_diags_add(L->diags, ST_SEV_ERROR, ST_ERR_LIMIT, &loc,
                            "region key longer than %u bytes", ST_PLACE_MAX_KEY);
    /* Take the geometry over: the feature is not needed afterwards. */
    d->geom = f->geom;
    st_geom_init(&f->geom);
    if (d->geom.type == ST_GEOM_COLLECTION)
        d->geom.type = d->geom.nparts > 1 ? ST_GEOM_MULTIPOLYGON : ST_GEOM_POLYGON;
    return ST_OK;
}

static st_status build(loader *L)
{
    st_status rc = ST_OK;
    for (size_t i = 0; rc == ST_OK && i < L->nfs; i++)
        rc = add_feature(L, i);
    for (size_t i = 0; rc == ST_OK && i < L->d->n; i++) {
        st_district *d = &L->d->items[i];
        char *what = st_strdup_printf("district '%s'", d->key);
        rc = what ? check_polygon(L, d, what) : ST_ERR_NOMEM;
        st_free(what);
    }
    if (rc == ST_OK) {
        L->d->keys = st_malloc((L->d->n ? L->d->n : 1) * sizeof *L->d->keys);
        if (!L->d->keys)
            return ST_ERR_NOMEM;
        for (size_t i = 0; i < L->d->n; i++)
            L->d->keys[i] = L->d->items[i].key;
    }
    return rc;
}

st_status st_districts_load(const st_districts_options *opt, st_diags *diags,
                            st_districts **out)
{
    *out = NULL;
    loader L;
    memset(&L, 0, sizeof L);
    L.opt = opt;
    L.diags = diags;
    L.d = st_calloc(1, sizeof *L.d);
    L.gx = st_geos_new();
    st_read_options ro = ST_READ_OPTIONS_DEFAULT;
    ro.crs_override = opt->crs_override;
    st_reader *r = NULL;
    st_status rc = L.d && L.gx ? ST_OK : ST_ERR_NOMEM;
    if (rc == ST_OK)
        rc = (L.d->index = st_strtab_new(0, 0)) ? ST_OK : ST_ERR_NOMEM;
    if (rc == ST_OK)
        rc = st_reader_open(opt->path, &ro, diags, &r);
    if (rc == ST_OK)
        rc = read_all(&L, r);
    if (rc == ST_OK) {
        L.d->path = st_strdup(st_reader_path(r));
        L.d->crs = st_strdup(st_reader_crs(r) ? st_reader_crs(r) : "");
        rc = L.d->path && L.d->crs ? ST_OK : ST_ERR_NOMEM;
    }
    if (rc == ST_OK)
        rc = resolve_fields(&L, st_reader_fields(r));
    if (rc == ST_OK)
        rc = build(&L);
    st_reader_close(r);
    for (size_t i = 0; i < L.nfs; i++)
        st_feature_free(L.fs[i]);
    st_free(L.fs);
    st_geos_free(L.gx);
    if (rc != ST_OK) {
        if (rc == ST_ERR_NOMEM)
            st_diags_add(diags, ST_SEV_ERROR, rc, NULL, "out of memory reading districts");
        st_districts_free(L.d);
        return rc;
    }
    *out = L.d;
    return ST_OK;
}

void st_districts_free(st_districts *d)
{
    if (!d)
        return;
    for (size_t i = 0; i < d->n; i++) {
        st_free(d->items[i].key);
        st_free(d->items[i].region);
        st_free(d->items[i].repair);
        st_geom_clear(&d->items[i].geom);
    }
    st_free(d->items);
    st_free(d->keys);
    st_strtab_free(d->index);
    st_free(d->path);
    st_free(d->crs);
    st_free(d->key_field);
    st_free(d->region_field);
    st_free(d);
}

size_t st_districts_count(const st_districts *d) { return d->n; }
const st_district *st_districts_get(const st_districts *d, size_t i) { return &d->items[i]; }
const char *const *st_districts_keys(const st_districts *d) { return d->keys; }
const char *st_districts_key_field(const st_districts *d) { return d->key_field; }
const char *st_districts_region_field(const st_districts *d) { return d->region_field; }
const char *st_districts_path(const st_districts *d) { return d->path; }
const char *st_districts_crs(const st_districts *d) { return d->crs; }
size_t st_districts_repaired(const st_districts *d) { return d->nrepaired; }

int32_t st_districts_find(const st_districts *d, const char *key)
{
    uint32_t id;
    return st_strtab_find(d->index, key, strlen(key), &id) ? (int32_t)id : -1;
}
