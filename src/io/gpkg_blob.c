/*
** io/gpkg_blob.c -- GeoPackage binary geometry: the "GP" header and the
** WKB behind it (OGC 12-128r, GeoPackage 1.2, clause 2.1.3, Req 19).
**
** Input:   a blob as stored in a feature table's geometry column (decode),
**          or an st_geom (encode).
** Output:  an st_geom, or the blob bytes in an st_buf.
** Errors:  ST_ERR_FORMAT with the reason in the caller's 'err' buffer: bad
**          magic, version, extended blob, envelope code 5-7, a WKB byte
**          order or type that does not exist, any length or count that
**          runs past the end of the blob.
** Limits:  ST_GPKG_MAX_BLOB bytes (ST_ERR_LIMIT); WKB nesting deeper than
**          WKB_MAX_DEPTH levels (ST_ERR_LIMIT).
**
** Why a WKB walk of our own before GEOS: it checks every count against the
** bytes left, so GEOS never sees a length it could over-allocate on, and it
** tells apart the curved and surface types GEOS 3.11 cannot read. The same
** walk can build the st_geom itself. It does so only when GEOS refuses a
** geometry the walk found well formed, which happens for rings GEOS cannot
** construct (not closed, fewer than 4 points): such a footprint then
** reaches the footprint stage, which reports it, instead of failing the
** whole read. The walk builds exactly what st_geom_from_geos() would.
*/
#include <math.h>
#include <stdarg.h>
#include <stdio.h>
#include <string.h>

#include "stocktake/geomx.h"
#include "ioInt.h"

#define WKB_MAX_DEPTH 32
#define NO_PART UINT32_MAX

/* Bytes of envelope for envelope codes 0..4 (Req 19, flags bits E). */
static const size_t envelope_bytes[5] = {0, 32, 48, 48, 64};

static void say(char *err, size_t errlen, const char *fmt, ...) ST_PRINTF(3, 4);

static void say(char *err, size_t errlen, const char *fmt, ...)
{
    if (!err || !errlen)
        return;
    va_list ap;
    va_start(ap, fmt);
    vsnprintf(err, errlen, fmt, ap);
    va_end(ap);
}

static uint32_t get_u32(const unsigned char *p, int le)
{
    uint32_t v = 0;
    for (int i = 0; i < 4; i++)
        v |= (uint32_t)p[le ? i : 3 - i] << (8 * i);
    return v;
}

static double get_f64(const unsigned char *p, int le)
{
    uint64_t v = 0;
    for (int i = 0; i < 8; i++)
        v |= (uint64_t)p[le ? i : 7 - i] << (8 * i);
    double d;
    memcpy(&d, &v, sizeof d);
    return d;
}

st_status st_gpkg_blob_header(const unsigned char *b, size_t n,
                              st_gpkg_header *h, char *err, size_t errlen)
{
    memset(h, 0, sizeof *h);
    if (n < 8) {
        say(err, errlen, "blob of %zu bytes is shorter than the 8-byte header", n);
        return ST_ERR_FORMAT;
    }
    if (b[0] != 'G' || b[1] != 'P') {
        say(err, errlen, "bad magic 0x%02x%02x (expected 'GP')", b[0], b[1]);
        return ST_ERR_FORMAT;
    }
    if (b[2] != 0) {
        say(err, errlen, "unsupported blob version %u (expected 0)", b[2]);
        return ST_ERR_FORMAT;
    }
    /* Bits 7-6 are reserved: ignored, as a reader of a later version would
    ** want us to. */
    unsigned flags = b[3];
    if (flags & 0x20) {
        say(err, errlen, "extended GeoPackage geometry (flag X) is not supported");
        return ST_ERR_FORMAT;
    }
    h->envelope_code = (int)((flags >> 1) & 7);
    if (h->envelope_code > 4) {
        say(err, errlen, "invalid envelope code %d (0 to 4 allowed)", h->envelope_code);
        return ST_ERR_FORMAT;
    }
    h->little_endian = (int)(flags & 1);
    h->empty = (int)((flags >> 4) & 1);
    size_t env = envelope_bytes[h->envelope_code];
    if (n < 8 + env) {
        say(err, errlen, "blob of %zu bytes is shorter than its %zu-byte header",
            n, 8 + env);
        return ST_ERR_FORMAT;
    }
    h->srs_id = (int32_t)get_u32(b + 4, h->little_endian);
    for (size_t i = 0; i < env / 8; i++)
        h->envelope[i] = get_f64(b + 8 + 8 * i, h->little_endian);
    h->size = 8 + env;
    return ST_OK;
}

/* ---- the WKB walk ------------------------------------------------------- */

typedef struct wkb_walk {
    const unsigned char *p;
    size_t n, pos;
    int has_z, has_m;
    int other;              /* a type GEOS cannot read was seen */
    char *err;
    size_t errlen;
} wkb_walk;

/* How a geometry adds itself to the st_geom being built (see
** st_geom_from_geos): a top-level geometry makes a part only when it is not
** empty; a member of a multi geometry always makes one; a member of a
** collection keeps only polygons and the polygons of multipolygons. */
typedef enum { AS_TOP, AS_PART, AS_COLLECTION_MEMBER } wkb_role;

typedef struct wkb_head {
    int le;
    uint32_t base;          /* OGC type code 1..17 without Z/M */
    size_t coord_size;      /* bytes per coordinate */
} wkb_head;

static st_status need(wkb_walk *w, size_t bytes, const char *what)
{
    if (w->n - w->pos >= bytes)
        return ST_OK;
    say(w->err, w->errlen, "WKB truncated at byte %zu: %s needs %zu bytes, %zu left",
        w->pos, what, bytes, w->n - w->pos);
    return ST_ERR_FORMAT;
}

/* Byte order and type, ISO (1000s for Z/M) or extended (high bits, SRID). */
static st_status read_head(wkb_walk *w, wkb_head *h)
{
    st_status rc = need(w, 5, "a geometry header");
    if (rc != ST_OK)
        return rc;
    unsigned order = w->p[w->pos];
    if (order > 1) {
        say(w->err, w->errlen, "WKB byte order %u at byte %zu (0 or 1 expected)",
            order, w->pos);
        return ST_ERR_FORMAT;
    }
    h->le = (int)order;
    uint32_t t = get_u32(w->p + w->pos + 1, h->le);
    size_t at = w->pos;
    w->pos += 5;
    int z = (t & 0x80000000u) != 0, m = (t & 0x40000000u) != 0;
    if (t & 0x20000000u) {
        if ((rc = need(w, 4, "an SRID")) != ST_OK)
            return rc;
        w->pos += 4;
    }
    t &= 0x0fffffffu;
    if (t >= 1000 && t < 4000) {
        unsigned d = t / 1000;
        z |= d == 1 || d == 3;
        m |= d == 2 || d == 3;
        t %= 1000;
    }
    /* 13 Curve and 14 Surface are abstract: never in WKB. */
    if (t < 1 || t > 17 || t == 13 || t == 14) {
        say(w->err, w->errlen, "unknown WKB geometry type %u at byte %zu",
            get_u32(w->p + at + 1, h->le), at);
        return ST_ERR_FORMAT;
    }
    h->base = t;
    h->coord_size = 8 * (size_t)(2 + z + m);
    w->has_z |= z;
    w->has_m |= m;
    return ST_OK;
}

/* A count, refused when 'count' items of at least 'min_item' bytes each
** cannot fit in what is left. */
static st_status read_count(wkb_walk *w, const wkb_head *h, size_t min_item,
                            const char *what, uint32_t *count)
{
    st_status rc = need(w, 4, what);
    if (rc != ST_OK)
        return rc;
    *count = get_u32(w->p + w->pos, h->le);
    size_t at = w->pos;
    w->pos += 4;
    if (*count > (w->n - w->pos) / min_item) {
        say(w->err, w->errlen, "%s %u at byte %zu does not fit in the %zu bytes left",
            what, *count, at, w->n - w->pos);
        return ST_ERR_FORMAT;
    }
    return ST_OK;
}

/* 'count' coordinates (already checked to fit), into sink when not NULL. */
static st_status walk_coords(wkb_walk *w, const wkb_head *h, uint32_t count,
                             st_geom *sink)
{
    for (uint32_t i = 0; i < count; i++) {
        const unsigned char *c = w->p + w->pos;
        w->pos += h->coord_size;
        if (sink) {
            st_status rc = st_geom_add_xy(sink, get_f64(c, h->le), get_f64(c + 8, h->le));
            if (rc != ST_OK)
                return rc;
        }
    }
    return ST_OK;
}

static st_status walk_geometry(wkb_walk *w, int depth, st_geom *sink,
                               wkb_role role, uint32_t expect, uint32_t *type);

static st_status walk_point(wkb_walk *w, const wkb_head *h, st_geom *sink, wkb_role role)
{
    st_status rc = need(w, h->coord_size, "a point");
    if (rc != ST_OK)
        return rc;
    double x = get_f64(w->p + w->pos, h->le), y = get_f64(w->p + w->pos + 8, h->le);
    /* An empty point is written as NaN coordinates (Req 19 notes). */
    int empty = isnan(x) && isnan(y);
    if (sink && (role != AS_TOP || !empty))
        rc = st_geom_begin_part(sink);
    if (rc == ST_OK && sink && !empty)
        rc = st_geom_begin_ring(sink);
    return rc == ST_OK ? walk_coords(w, h, 1, empty ? NULL : sink) : rc;
}

static st_status walk_line(wkb_walk *w, const wkb_head *h, st_geom *sink, wkb_role role)
{
    uint32_t count;
    st_status rc = read_count(w, h, h->coord_size, "point count", &count);
    if (rc == ST_OK && sink && (role != AS_TOP || count))
        rc = st_geom_begin_part(sink);
    if (rc == ST_OK && sink && count)
        rc = st_geom_begin_ring(sink);
    return rc == ST_OK ? walk_coords(w, h, count, count ? sink : NULL) : rc;
}

static st_status walk_polygon(wkb_walk *w, const wkb_head *h, st_geom *sink, wkb_role role)
{
    uint32_t nrings;
    st_status rc = read_count(w, h, 4, "ring count", &nrings);
    if (rc != ST_OK)
        return rc;
    /* Empty when there is no ring or the shell has no point (as GEOS). */
    int empty = nrings == 0 || get_u32(w->p + w->pos, h->le) == 0;
    if (sink && (role != AS_TOP || !empty))
        rc = st_geom_begin_part(sink);
    for (uint32_t r = 0; rc == ST_OK && r < nrings; r++) {
        uint32_t count;
        rc = read_count(w, h, h->coord_size, "point count", &count);
        if (rc == ST_OK && sink && !empty)
            rc = st_geom_begin_ring(sink);
        if (rc == ST_OK)
            rc = walk_coords(w, h, count, empty ? NULL : sink);
    }
    return rc;
}

/* Members of a multi geometry or collection. A multipoint holds points,
** a multilinestring lines, a multipolygon polygons (OGC 06-103r4). */
static st_status walk_members(wkb_walk *w, const wkb_head *h, int depth,
                              st_geom *sink)
{
    uint32_t n;
    /* 9 bytes: the smallest geometry, an empty linestring. */
    st_status rc = read_count(w, h, 9, "member count", &n);
    uint32_t expect = h->base >= 4 && h->base <= 6 ? h->base - 3 : 0;
    wkb_role role = h->base == 7 ? AS_COLLECTION_MEMBER : AS_PART;
    for (uint32_t i = 0; rc == ST_OK && i < n; i++) {
        uint32_t t;
        rc = walk_geometry(w, depth + 1, sink, role, expect, &t);
    }
    return rc;
}

static st_status walk_geometry(wkb_walk *w, int depth, st_geom *sink,
                               wkb_role role, uint32_t expect, uint32_t *type)
{
    if (depth > WKB_MAX_DEPTH) {
        say(w->err, w->errlen, "WKB nested deeper than %d levels at byte %zu",
            WKB_MAX_DEPTH, w->pos);
        return ST_ERR_LIMIT;
    }
    wkb_head h;
    size_t at = w->pos;
    st_status rc = read_head(w, &h);
    if (rc != ST_OK)
        return rc;
    *type = h.base;
    if (expect && h.base != expect) {
        say(w->err, w->errlen, "WKB type %u at byte %zu inside a multi geometry "
            "that holds only type %u", h.base, at, expect);
        return ST_ERR_FORMAT;
    }
    if (role == AS_COLLECTION_MEMBER) {
        if (h.base == 3)
            role = AS_PART;
        else if (h.base != 6)
            sink = NULL;      /* collections keep polygonal members only */
    }
    if (h.base > 7) {
        w->other = 1;         /* curves, surfaces, TIN, triangle */
        sink = NULL;
    }
    switch (h.base) {
    case 1:
        return walk_point(w, &h, sink, role);
    case 2:
    case 8:                   /* CircularString: same layout */
        return walk_line(w, &h, sink, role);
    case 3:
    case 17:                  /* Triangle: same layout */
        return walk_polygon(w, &h, sink, role);
    default:                  /* multi, collection, compound, TIN ... */
        return walk_members(w, &h, depth, sink);
    }
}

static st_geom_type type_of_wkb(uint32_t base)
{
    static const st_geom_type types[] = {
        ST_GEOM_OTHER, ST_GEOM_POINT, ST_GEOM_LINESTRING, ST_GEOM_POLYGON,
        ST_GEOM_MULTIPOINT, ST_GEOM_MULTILINESTRING, ST_GEOM_MULTIPOLYGON,
        ST_GEOM_COLLECTION};
    return base < sizeof types / sizeof types[0] ? types[base] : ST_GEOM_OTHER;
}

st_status st_gpkg_blob_decode(st_geos *gx, const unsigned char *b, size_t n,
                              st_geom *out, char *err, size_t errlen)
{
    st_geom_clear(out);
    say(err, errlen, "%s", "");
    if (n > ST_GPKG_MAX_BLOB) {
        say(err, errlen, "blob of %zu bytes exceeds the limit of %zu bytes",
            n, ST_GPKG_MAX_BLOB);
        return ST_ERR_LIMIT;
    }
    st_gpkg_header h;
    st_status rc = st_gpkg_blob_header(b, n, &h, err, errlen);
    if (rc != ST_OK)
        return rc;
    wkb_walk w = {b + h.size, n - h.size, 0, 0, 0, 0, err, errlen};
    uint32_t top;
    rc = walk_geometry(&w, 0, NULL, AS_TOP, 0, &top);
    if (rc != ST_OK)
        return rc;
    if (w.other) {
        out->type = ST_GEOM_OTHER;
    } else {
        /* Trailing bytes after the geometry are not passed on. */
        char gerr[256] = "";
        rc = st_geom_from_wkb(gx, b + h.size, w.pos, out, gerr, sizeof gerr);
        if (rc == ST_ERR_FORMAT) {
            /* GEOS refused what the walk found well formed: keep the
            ** footprint as written (see the file comment). */
            st_geom_clear(out);
            out->type = type_of_wkb(top);
            w.pos = 0;
            rc = walk_geometry(&w, 0, out, AS_TOP, 0, &top);
        } else if (rc == ST_ERR_GEOS) {
            say(err, errlen, "GEOS: %s", gx->last_error);
        }
        if (rc != ST_OK) {
            st_geom_clear(out);
            return rc;
        }
    }
    out->has_z = (uint8_t)w.has_z;
    out->has_m = (uint8_t)w.has_m;
    return ST_OK;
}

/* ---- encoding -------------------------------------------------------------- */

static void set_u32le(unsigned char *p, uint32_t v)
{
    for (int i = 0; i < 4; i++)
        p[i] = (unsigned char)(v >> (8 * i));
}

static void set_f64le(unsigned char *p, double d)
{
    uint64_t v;
    memcpy(&v, &d, sizeof v);
    for (int i = 0; i < 8; i++)
        p[i] = (unsigned char)(v >> (8 * i));
}

static st_status put_u32(st_buf *b, uint32_t v)
{
    unsigned char c[4];
    set_u32le(c, v);
    return st_buf_append(b, (const char *)c, sizeof c);
}

static st_status put_head(st_buf *b, uint32_t type)
{
    unsigned char c[5] = {1};   /* little-endian (NDR) */
    set_u32le(c + 1, type);
    return st_buf_append(b, (const char *)c, sizeof c);
}

/* Coordinates [a, b) as x,y doubles, in chunks to spare calls. */
static st_status put_coords(st_buf *out, const st_geom *g, uint32_t a, uint32_t b)
{
    unsigned char chunk[16 * 128];
    while (a < b) {
        uint32_t k = b - a < 128 ? b - a : 128;
        for (uint32_t i = 0; i < k; i++) {
            set_f64le(chunk + 16 * i, g->xy[2 * (size_t)(a + i)]);
            set_f64le(chunk + 16 * i + 8, g->xy[2 * (size_t)(a + i) + 1]);
        }
        st_status rc = st_buf_append(out, (const char *)chunk, 16 * (size_t)k);
        if (rc != ST_OK)
            return rc;
        a += k;
    }
    return ST_OK;
}

static st_status put_ring(st_buf *out, const st_geom *g, uint32_t r)
{
    uint32_t a = g->ring_coord[r], b = g->ring_coord[r + 1];
    st_status rc = put_u32(out, b - a);
    return rc == ST_OK ? put_coords(out, g, a, b) : rc;
}

/* Rings of part p, or none for NO_PART. */
static void part_rings(const st_geom *g, uint32_t p, uint32_t *r0, uint32_t *r1)
{
    *r0 = *r1 = 0;
    if (p != NO_PART && p < g->nparts) {
        *r0 = g->part_ring[p];
        *r1 = g->part_ring[p + 1];
    }
}

static st_status put_point(st_buf *out, const st_geom *g, uint32_t p)
{
    uint32_t r0, r1;
    part_rings(g, p, &r0, &r1);
    st_status rc = put_head(out, 1);
    if (rc != ST_OK)
        return rc;
    if (r0 < r1 && g->ring_coord[r0] < g->ring_coord[r0 + 1])
        return put_coords(out, g, g->ring_coord[r0], g->ring_coord[r0] + 1);
    /* POINT EMPTY: NaN coordinates, as GeoPackage and GEOS write it. */
    unsigned char nan2[16];
    set_f64le(nan2, NAN);
    set_f64le(nan2 + 8, NAN);
    return st_buf_append(out, (const char *)nan2, sizeof nan2);
}

static st_status put_line(st_buf *out, const st_geom *g, uint32_t p)
{
    uint32_t r0, r1;
    part_rings(g, p, &r0, &r1);
    st_status rc = put_head(out, 2);
    if (rc != ST_OK)
        return rc;
    return r0 < r1 ? put_ring(out, g, r0) : put_u32(out, 0);
}

static st_status put_polygon(st_buf *out, const st_geom *g, uint32_t p)
{
    uint32_t r0, r1;
    part_rings(g, p, &r0, &r1);
    st_status rc = put_head(out, 3);
    if (rc == ST_OK)
        rc = put_u32(out, r1 - r0);
    for (uint32_t r = r0; rc == ST_OK && r < r1; r++)
        rc = put_ring(out, g, r);
    return rc;
}

static st_status put_wkb(st_buf *out, const st_geom *g)
{
    uint32_t first = g->nparts ? 0 : NO_PART;
    st_status (*member)(st_buf *, const st_geom *, uint32_t);
    uint32_t type;
    switch (g->type) {
    case ST_GEOM_POINT: return put_point(out, g, first);
    case ST_GEOM_LINESTRING: return put_line(out, g, first);
    case ST_GEOM_POLYGON: return put_polygon(out, g, first);
    case ST_GEOM_MULTIPOINT: member = put_point; type = 4; break;
    case ST_GEOM_MULTILINESTRING: member = put_line; type = 5; break;
    default: member = put_polygon; type = 6; break;  /* multipolygon, collection */
    }
    st_status rc = put_head(out, type);
    if (rc == ST_OK)
        rc = put_u32(out, g->nparts);
    for (uint32_t p = 0; rc == ST_OK && p < g->nparts; p++)
        rc = member(out, g, p);
    return rc;
}

/* Envelope (minx, miny, maxx, maxy) of the finite coordinates; 0 if none. */
static int finite_envelope(const st_geom *g, double env[4])
{
    int found = 0;
    for (uint32_t i = 0; i < g->ncoords; i++) {
        double x = g->xy[2 * (size_t)i], y = g->xy[2 * (size_t)i + 1];
        if (!isfinite(x) || !isfinite(y))
            continue;
        if (!found) {
            env[0] = env[2] = x;
            env[1] = env[3] = y;
            found = 1;
            continue;
        }
        if (x < env[0]) env[0] = x;
        if (x > env[2]) env[2] = x;
        if (y < env[1]) env[1] = y;
        if (y > env[3]) env[3] = y;
    }
    return found;
}

st_status st_gpkg_blob_encode(const st_geom *g, int32_t srs_id, st_buf *out,
                              double env[4], int *has_env)
{
    st_buf_clear(out);
    out->limit = ST_GPKG_MAX_BLOB;
    *has_env = 0;
    if (g->type == ST_GEOM_NULL || g->type == ST_GEOM_OTHER)
        return ST_ERR_USAGE;
    *has_env = finite_envelope(g, env);
    int empty = g->ncoords == 0;
    /* flags: B = 1 (little-endian), E = 1 with an envelope, Y = empty */
    unsigned char head[8 + 32] = {'G', 'P', 0,
                                  (unsigned char)(1 | (*has_env ? 2 : 0) | (empty ? 0x10 : 0))};
    set_u32le(head + 4, (uint32_t)srs_id);
    size_t len = 8;
    if (*has_env) {
        /* Envelope order is [minx, maxx, miny, maxy] (Req 19). */
        set_f64le(head + 8, env[0]);
        set_f64le(head + 16, env[2]);
        set_f64le(head + 24, env[1]);
        set_f64le(head + 32, env[3]);
        len += 32;
    }
    st_status rc = st_buf_append(out, (const char *)head, len);
    return rc == ST_OK ? put_wkb(out, g) : rc;
}
