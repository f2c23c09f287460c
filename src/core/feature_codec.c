/*
** core/feature_codec.c -- one st_feature as a flat byte record, and back:
** what a part (io/part.c) stores per building.
**
** Input:   encode: a feature (borrowed) whose geometry offsets are
**          consistent; decode: any bytes, possibly hostile.
** Output:  encode appends the record to an st_buf; decode returns a new
**          feature whose source values sit in one packed block (as
**          st_feature_pack_values makes them) and whose geometry arrays
**          have exactly the size of their contents.
** Layout:  little-endian, fixed width; "str" is a u32 byte length
**          (0xFFFFFFFF for NULL) followed by that many bytes, no NUL;
**          "geom" is u8 type, u8 has_z, u8 has_m, u32 nparts, u32 nrings,
**          u32 ncoords, then part_ring (nparts + 1 u32) when nparts > 0,
**          ring_coord (nrings + 1 u32) when nrings > 0, and 2 * ncoords
**          f64 (x, y). The record:
**            u8 CODEC_FORMAT, u32 layer, u64 index, str source_id,
**            geom geom, geom source_geom, u32 nvalues, nvalues * str,
**            u64 bid, u8 status, str reason, u64 duplicate_of,
**            f64 area_m2, f64 perimeter_m, u32 flags, i32 district,
**            u32 nschema, nschema * (str text, u8 provenance, str rule).
**          Doubles are copied bit for bit (-0.0 and NaN payloads kept).
** Errors:  decode accepts only what encode can produce: any other byte
**          string (truncated, trailing bytes, counts beyond the bytes
**          left, offsets not starting at 0, decreasing or not ending at the
**          count, enum values out of range, a NUL inside a string, a
**          district below -1) is ST_ERR_FORMAT. So a record that decodes
**          re-encodes to the very same bytes. No allocation is larger than
**          the bytes left could describe. Encode refuses a feature it
**          could not decode back (ST_ERR_USAGE).
** Limits:  a string or array beyond 2^32 - 2 bytes or entries cannot be
**          encoded (ST_ERR_LIMIT); st_buf's own limit applies to 'out'.
*/
#include <string.h>

#include "stocktake/part.h"

#define CODEC_FORMAT 1
#define NULL_STR UINT32_MAX

/* ---- writing ------------------------------------------------------------ */

static unsigned char *put_u32(unsigned char *p, uint32_t v)
{
    for (int i = 0; i < 4; i++)
        *p++ = (unsigned char)(v >> (8 * i));
    return p;
}

static unsigned char *put_u64(unsigned char *p, uint64_t v)
{
    for (int i = 0; i < 8; i++)
        *p++ = (unsigned char)(v >> (8 * i));
    return p;
}

static unsigned char *put_f64(unsigned char *p, double d)
{
    uint64_t v;
    memcpy(&v, &d, sizeof v);
    return put_u64(p, v);
}

static unsigned char *put_str(unsigned char *p, const char *s)
{
    if (!s)
        return put_u32(p, NULL_STR);
    size_t n = strlen(s);
    p = put_u32(p, (uint32_t)n);
    memcpy(p, s, n);
    return p + n;
}

/* Add the bytes of string field 's' to *n; 0 when it is too long. */
static int add_str(uint64_t *n, const char *s)
{
    size_t len = s ? strlen(s) : 0;
    if (len >= NULL_STR)
        return 0;
    *n += 4 + (uint64_t)len;
    return 1;
}

/* 1 when off[0..n] starts at 0, never decreases and ends at 'last'. */
static int offsets_ok(const uint32_t *off, uint32_t n, uint32_t last)
{
    if (off[0] != 0 || off[n] != last)
        return 0;
    for (uint32_t i = 0; i < n; i++)
        if (off[i + 1] < off[i])
            return 0;
    return 1;
}

/* 1 when g can be encoded and decoded back unchanged. */
static int geom_ok(const st_geom *g)
{
    if ((unsigned)g->type > ST_GEOM_OTHER)
        return 0;
    if (g->nparts == 0)
        return g->nrings == 0 && g->ncoords == 0;
    if (g->nrings == 0 && g->ncoords != 0)
        return 0;
    if (g->nparts == UINT32_MAX || g->nrings == UINT32_MAX || !g->part_ring ||
        !offsets_ok(g->part_ring, g->nparts, g->nrings))
        return 0;
    if (g->nrings && (!g->ring_coord || !offsets_ok(g->ring_coord, g->nrings, g->ncoords)))
        return 0;
    return g->ncoords == 0 || g->xy;
}

/* The geometry as read, or an empty NULL-typed one when f has none: the
** record always holds two geometries. */
static const st_geom *source_of(const st_feature *f)
{
    static const st_geom none = {.type = ST_GEOM_NULL};
    return f->source_geom ? f->source_geom : &none;
}

static uint64_t geom_size(const st_geom *g)
{
    uint64_t n = 3 + 12 + 16 * (uint64_t)g->ncoords;
    if (g->nparts)
        n += 4 * ((uint64_t)g->nparts + 1);
    if (g->nrings)
        n += 4 * ((uint64_t)g->nrings + 1);
    return n;
}

static unsigned char *put_geom(unsigned char *p, const st_geom *g)
{
    *p++ = (unsigned char)g->type;
    *p++ = g->has_z;
    *p++ = g->has_m;
    p = put_u32(p, g->nparts);
    p = put_u32(p, g->nrings);
    p = put_u32(p, g->ncoords);
    for (uint32_t i = 0; g->nparts && i <= g->nparts; i++)
        p = put_u32(p, g->part_ring[i]);
    for (uint32_t i = 0; g->nrings && i <= g->nrings; i++)
        p = put_u32(p, g->ring_coord[i]);
    for (uint64_t i = 0; i < 2 * (uint64_t)g->ncoords; i++)
        p = put_f64(p, g->xy[i]);
    return p;
}

/* The record's size; 0 when a string is too long to encode. */
static uint64_t record_size(const st_feature *f)
{
    uint64_t n = 1 + 4 + 8 + geom_size(&f->geom) + geom_size(source_of(f)) + 4 +
                 8 + 1 + 8 + 8 + 8 + 4 + 4 + 4;
    int ok = add_str(&n, f->source_id) && add_str(&n, f->reason);
    for (uint32_t i = 0; ok && i < f->nvalues; i++)
        ok = add_str(&n, f->values[i]);
    for (uint32_t i = 0; ok && i < f->nschema; i++)
        ok = add_str(&n, f->schema[i].text) && add_str(&n, f->schema[i].rule);
    return ok ? n + f->nschema : 0;
}

/* 1 when f can be encoded and decoded back unchanged. */
static int feature_ok(const st_feature *f)
{
    if (!geom_ok(&f->geom) || !geom_ok(source_of(f)) ||
        (unsigned)f->status > ST_STATUS_REJECTED || f->district < -1 ||
        (f->nvalues && !f->values) || (f->nschema && !f->schema))
        return 0;
    for (uint32_t i = 0; i < f->nschema; i++)
        if ((unsigned)f->schema[i].from > ST_PROV_SOURCE)
            return 0;
    return 1;
}

/* Room for n more bytes (and the NUL) in b, within its limit. */
static st_status make_room(st_buf *b, size_t n)
{
    if (n > SIZE_MAX / 2 - b->len || (b->limit && b->len + n > b->limit))
        return ST_ERR_LIMIT;
    size_t need = b->len + n + 1;
    if (need <= b->cap)
        return ST_OK;
    size_t cap = b->cap ? b->cap : 64;
    while (cap < need)
        cap *= 2;
    char *d = st_realloc(b->data, cap);
    if (!d)
        return ST_ERR_NOMEM;
    b->data = d;
    b->cap = cap;
    return ST_OK;
}

st_status st_feature_encode(const st_feature *f, st_buf *out)
{
    if (!feature_ok(f))
        return ST_ERR_USAGE;
    uint64_t size = record_size(f);
    if (size == 0 || size > SIZE_MAX / 2)
        return ST_ERR_LIMIT;
    st_status rc = make_room(out, (size_t)size);
    if (rc != ST_OK)
        return rc;
    size_t at = out->len;
    unsigned char *p = (unsigned char *)out->data + at;
    *p++ = CODEC_FORMAT;
    p = put_u32(p, f->layer);
    p = put_u64(p, f->index);
    p = put_str(p, f->source_id);
    p = put_geom(p, &f->geom);
    p = put_geom(p, source_of(f));
    p = put_u32(p, f->nvalues);
    for (uint32_t i = 0; i < f->nvalues; i++)
        p = put_str(p, f->values[i]);
    p = put_u64(p, f->bid);
    *p++ = (unsigned char)f->status;
    p = put_str(p, f->reason);
    p = put_u64(p, f->duplicate_of);
    p = put_f64(p, f->area_m2);
    p = put_f64(p, f->perimeter_m);
    p = put_u32(p, f->flags);
    p = put_u32(p, (uint32_t)f->district);
    p = put_u32(p, f->nschema);
    for (uint32_t i = 0; i < f->nschema; i++) {
        p = put_str(p, f->schema[i].text);
        *p++ = (unsigned char)f->schema[i].from;
        p = put_str(p, f->schema[i].rule);
    }
    out->len = at + (size_t)size;
    out->data[out->len] = '\0';
    return ST_OK;
}

/* ---- reading ------------------------------------------------------------ */

/* The bytes not yet read. Every get_* returns 0, consuming nothing, when
** there are too few. */
typedef struct cursor {
    const unsigned char *p;
    size_t left;
} cursor;

static int get_u8(cursor *c, uint8_t *v)
{
    if (c->left < 1)
        return 0;
    *v = *c->p++;
    c->left--;
    return 1;
}

static int get_u32(cursor *c, uint32_t *v)
{
    if (c->left < 4)
        return 0;
    *v = 0;
    for (int i = 0; i < 4; i++)
        *v |= (uint32_t)c->p[i] << (8 * i);
    c->p += 4;
    c->left -= 4;
    return 1;
}

static int get_u64(cursor *c, uint64_t *v)
{
    if (c->left < 8)
        return 0;
    *v = 0;
    for (int i = 0; i < 8; i++)
        *v |= (uint64_t)c->p[i] << (8 * i);
    c->p += 8;
    c->left -= 8;
    return 1;
}

static int get_f64(cursor *c, double *d)
{
    uint64_t v;
    if (!get_u64(c, &v))
        return 0;
    memcpy(d, &v, sizeof *d);
    return 1;
}

/* A string field: *s NULL for a NULL string, else its *n bytes (no NUL
** among them, as encode never writes one). */
static int get_str(cursor *c, const char **s, uint32_t *n)
{
    cursor at = *c;
    if (!get_u32(&at, n))
        return 0;
    *s = NULL;
    if (*n == NULL_STR) {
        *c = at;
        return 1;
    }
    if (*n > at.left || memchr(at.p, '\0', *n))
        return 0;
    *s = (const char *)at.p;
    at.p += *n;
    at.left -= *n;
    *c = at;
    return 1;
}

/* A string field as an owned copy (NULL for NULL). */
static st_status take_str(cursor *c, char **out)
{
    const char *s;
    uint32_t n;
    if (!get_str(c, &s, &n))
        return ST_ERR_FORMAT;
    if (s && !(*out = st_strndup(s, n)))
        return ST_ERR_NOMEM;
    return ST_OK;
}

/* Read n + 1 offsets into off and check them against 'last'. */
static int get_offsets(cursor *c, uint32_t *off, uint32_t n, uint32_t last)
{
    for (uint32_t i = 0; i <= n; i++)
        if (!get_u32(c, &off[i]))
            return 0;
    return offsets_ok(off, n, last);
}

/* A geometry into g (NULL-typed and empty on entry; left so on failure). */
static st_status get_geom(cursor *c, st_geom *g)
{
    uint8_t type, z, m;
    uint32_t np, nr, nc;
    if (!get_u8(c, &type) || !get_u8(c, &z) || !get_u8(c, &m) || !get_u32(c, &np) ||
        !get_u32(c, &nr) || !get_u32(c, &nc) || type > ST_GEOM_OTHER)
        return ST_ERR_FORMAT;
    if ((np == 0 && (nr || nc)) || (nr == 0 && nc) || np == UINT32_MAX || nr == UINT32_MAX)
        return ST_ERR_FORMAT;
    /* Check the sizes against the bytes left before allocating. */
    uint64_t need = 16 * (uint64_t)nc + (np ? 4 * ((uint64_t)np + 1) : 0) +
                    (nr ? 4 * ((uint64_t)nr + 1) : 0);
    if (need > c->left)
        return ST_ERR_FORMAT;
    if (np) {
        g->part_ring = st_malloc(((size_t)np + 1) * sizeof *g->part_ring);
        g->ring_coord = st_malloc(((size_t)nr + 1) * sizeof *g->ring_coord);
        g->xy = nc ? st_malloc((size_t)nc * 2 * sizeof *g->xy) : NULL;
        if (!g->part_ring || !g->ring_coord || (nc && !g->xy)) {
            st_geom_clear(g);
            return ST_ERR_NOMEM;
        }
        g->ring_coord[0] = 0;
        if (!get_offsets(c, g->part_ring, np, nr) ||
            (nr && !get_offsets(c, g->ring_coord, nr, nc))) {
            st_geom_clear(g);
            return ST_ERR_FORMAT;
        }
        for (uint64_t i = 0; i < 2 * (uint64_t)nc; i++)
            (void)get_f64(c, &g->xy[i]);   /* the bytes were counted above */
    }
    g->type = (st_geom_type)type;
    g->has_z = z;
    g->has_m = m;
    g->nparts = np;
    g->nrings = nr;
    g->ncoords = nc;
    g->cap_parts = np ? np + 1 : 0;
    g->cap_rings = np ? nr + 1 : 0;
    g->cap_coords = nc;
    return ST_OK;
}

/* The source values, into one block laid out as st_feature_pack_values
** makes it: the pointer array, then the strings. */
static st_status get_values(cursor *c, st_feature *f)
{
    uint32_t nv;
    if (!get_u32(c, &nv) || (uint64_t)nv * 4 > c->left)
        return ST_ERR_FORMAT;
    if (nv == 0)
        return ST_OK;
    cursor scan = *c;
    uint64_t bytes = (uint64_t)nv * sizeof(char *);
    const char *s;
    uint32_t n;
    for (uint32_t i = 0; i < nv; i++) {
        if (!get_str(&scan, &s, &n))
            return ST_ERR_FORMAT;
        bytes += s ? (uint64_t)n + 1 : 0;
    }
    if (bytes > UINT32_MAX)
        return ST_ERR_LIMIT;   /* values_packed holds the block's size */
    char *block = st_malloc((size_t)bytes);
    if (!block)
        return ST_ERR_NOMEM;
    char **v = (char **)(void *)block;
    char *text = block + (size_t)nv * sizeof(char *);
    for (uint32_t i = 0; i < nv; i++) {
        (void)get_str(c, &s, &n);   /* checked by the scan */
        v[i] = NULL;
        if (s) {
            memcpy(text, s, n);
            text[n] = '\0';
            v[i] = text;
            text += (size_t)n + 1;
        }
    }
    f->values = v;
    f->nvalues = nv;
    f->values_packed = (uint32_t)bytes;
    return ST_OK;
}

/* The schema values, without their rules (see intern_rules). */
static st_status get_schema(cursor *c, st_feature *f, int *has_rules)
{
    uint32_t ns;
    if (!get_u32(c, &ns) || (uint64_t)ns * 9 > c->left)
        return ST_ERR_FORMAT;
    if (ns == 0)
        return ST_OK;
    f->schema = st_calloc(ns, sizeof *f->schema);
    if (!f->schema)
        return ST_ERR_NOMEM;
    f->nschema = ns;
    for (uint32_t i = 0; i < ns; i++) {
        st_status rc = take_str(c, &f->schema[i].text);
        uint8_t from;
        const char *s;
        uint32_t n;
        if (rc != ST_OK)
            return rc;
        if (!get_u8(c, &from) || from > ST_PROV_SOURCE || !get_str(c, &s, &n))
            return ST_ERR_FORMAT;
        f->schema[i].from = (st_provenance)from;
        *has_rules |= s != NULL;
    }
    return ST_OK;
}

/* Second walk over the schema part (already checked): intern each rule. */
static st_status intern_rules(cursor c, st_feature *f, st_strtab *strings)
{
    uint32_t ns, n, id;
    const char *s;
    uint8_t from;
    (void)get_u32(&c, &ns);
    for (uint32_t i = 0; i < ns; i++) {
        (void)get_str(&c, &s, &n);
        (void)get_u8(&c, &from);
        (void)get_str(&c, &s, &n);
        if (!s)
            continue;
        st_status rc = st_strtab_intern(strings, s, n, &id, NULL);
        if (rc != ST_OK)
            return rc;
        f->schema[i].rule = st_strtab_get(strings, id, NULL);
    }
    return ST_OK;
}

/* The geometry as read into f->source_geom; an empty NULL-typed one (what
** source_of writes for none) reads as none, anything else is kept so that
** the record encodes back to the same bytes. */
static st_status get_source_geom(cursor *c, st_feature *f)
{
    st_geom g;
    st_geom_init(&g);
    st_status rc = get_geom(c, &g);
    if (rc != ST_OK || (g.type == ST_GEOM_NULL && !g.has_z && !g.has_m && !g.nparts)) {
        st_geom_clear(&g);
        return rc;
    }
    if (!(f->source_geom = st_geom_new())) {
        st_geom_clear(&g);
        return ST_ERR_NOMEM;
    }
    *f->source_geom = g;
    return ST_OK;
}

st_status st_feature_decode(const void *data, size_t n, st_strtab *strings,
                            st_feature **out)
{
    *out = NULL;
    cursor c = {data, data ? n : 0};
    st_feature *f = st_feature_new();
    if (!f)
        return ST_ERR_NOMEM;
    st_status rc = ST_ERR_FORMAT;
    uint8_t format, status;
    uint32_t district;
    if (!get_u8(&c, &format) || format != CODEC_FORMAT || !get_u32(&c, &f->layer) ||
        !get_u64(&c, &f->index))
        goto done;
    if ((rc = take_str(&c, &f->source_id)) != ST_OK ||
        (rc = get_geom(&c, &f->geom)) != ST_OK ||
        (rc = get_source_geom(&c, f)) != ST_OK ||
        (rc = get_values(&c, f)) != ST_OK)
        goto done;
    rc = ST_ERR_FORMAT;
    if (!get_u64(&c, &f->bid) || !get_u8(&c, &status) || status > ST_STATUS_REJECTED)
        goto done;
    f->status = (st_feature_status)status;
    if ((rc = take_str(&c, &f->reason)) != ST_OK)
        goto done;
    rc = ST_ERR_FORMAT;
    if (!get_u64(&c, &f->duplicate_of) || !get_f64(&c, &f->area_m2) ||
        !get_f64(&c, &f->perimeter_m) || !get_u32(&c, &f->flags) ||
        !get_u32(&c, &district) || (int32_t)district < -1)
        goto done;
    f->district = (int32_t)district;
    cursor schema = c;
    int has_rules = 0;
    if ((rc = get_schema(&c, f, &has_rules)) != ST_OK)
        goto done;
    rc = ST_ERR_FORMAT;
    if (c.left != 0)
        goto done;   /* trailing bytes */
    rc = ST_OK;
    if (has_rules)
        rc = strings ? intern_rules(schema, f, strings) : ST_ERR_USAGE;
done:
    if (rc != ST_OK) {
        st_feature_free(f);
        return rc;
    }
    *out = f;
    return ST_OK;
}
