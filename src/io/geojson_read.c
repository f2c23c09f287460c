/*
** io/geojson_read.c -- streaming reader for GeoJSON (RFC 7946) and for
** newline-delimited GeoJSON (one Feature per line, RFC 8142 record
** separators accepted).
**
** Input:   .geojson/.json: one FeatureCollection (or a single Feature, read
**          as a one-feature layer). .geojsonl/.geojsons/.ndjson: a sequence
**          of Features separated by newlines, blank lines and RS (0x1E).
**          The file is fed to YAJL's event parser in 64 KiB chunks; the
**          callbacks build one feature at a time, and every feature is
**          queued as soon as its closing brace is seen, so memory depends
**          on the largest feature, never on the size of the file.
** Output:  features in the source CRS: CRS84 (RFC 7946 section 4) unless a
**          legacy top-level "crs" member names another one. Properties:
**          strings as they are (invalid UTF-8 and NUL replaced by U+FFFD), numbers
**          as their literal text, booleans "true"/"false", null as missing,
**          nested objects/arrays as compact JSON text (ST_FIELD_JSON). A
**          field is added when its name first appears; its type comes from
**          its first non-null value (integer or real by the literal).
**          Geometries of every GeoJSON type are carried with their st_geom
**          type (later stages reject what is not polygonal); in a
**          GeometryCollection only the polygonal members are kept (as
**          parts). Empty rings and parts are dropped; unclosed rings are
**          kept as they are; a third number sets has_z (Z is dropped).
**          "id" becomes the feature's source_id.
** Errors:  malformed JSON, a wrong structure (no "features", a member of
**          "features" that is not a Feature, coordinates that are not
**          numbers, a position with fewer than 2 numbers) are ST_ERR_FORMAT;
**          each diagnostic gives the line, the byte offset and the feature
**          index. Features completed before an error are still returned;
**          the error comes with the next call. Open reads ahead to the
**          first feature (see below), so an error before it fails open. A "crs" member that comes
**          after the first feature is an error unless it names the CRS
**          already in use: the CRS is fixed when the reader opens.
** Limits (ST_ERR_LIMIT, with the same location):
**          nesting depth            64 arrays/objects, from the document top
**          one string or number     1 MiB of raw JSON text
**          one property value       1 MiB (nested JSON after re-serialising)
**          one property name        4096 bytes
**          properties of a feature  64 MiB of text in total
**          distinct property names  10000 per layer
**          coordinates of a feature 16,777,216 positions (256 MiB of doubles)
**          one coordinate's text    127 characters
** Memory:  YAJL's own buffers come from the C allocator, not st_malloc:
**          YAJL does not check its internal allocations, so an injected
**          failure there would crash instead of testing our error paths.
**          Numbers are read with strtod, which assumes the "C" numeric
**          locale (the library never calls setlocale).
*/
#include <errno.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>

#include <yajl/yajl_parse.h>

#include "ioInt.h"

#define GJ_CHUNK (64 * 1024)
#define GJ_MAX_DEPTH 64
#define GJ_MAX_TOKEN (1024 * 1024)
#define GJ_MAX_VALUE (1024 * 1024)
#define GJ_MAX_NAME 4096
#define GJ_MAX_FEATURE_TEXT (64u * 1024 * 1024)
#define GJ_MAX_FIELDS 10000
#define GJ_MAX_COORDS (16u * 1024 * 1024)
#define GJ_MAX_COORD_LEVEL 4   /* MultiPolygon: polygons/rings/positions */

/* What an open array or object is. */
typedef enum {
    K_SKIP,       /* a value we do not use (foreign member): depth only */
    K_ROOT,       /* the top-level object */
    K_FEATURES,   /* the "features" array */
    K_FEATURE,    /* a Feature object inside "features" */
    K_PROPS,      /* a feature's "properties" object */
    K_CAPTURE,    /* a nested property value being re-serialised */
    K_GEOM,       /* a geometry object */
    K_COORDS,     /* an array inside "coordinates" */
    K_GEOMS,      /* a GeometryCollection's "geometries" array */
    K_CRS,        /* the legacy "crs" member */
    K_CRS_PROPS   /* its "properties" */
} frame_kind;

/* Which member of an object the next value belongs to. */
typedef enum {
    M_OTHER, M_TYPE, M_ID, M_FEATURES, M_CRS, M_PROPERTIES, M_GEOMETRY,
    M_COORDINATES, M_GEOMETRIES, M_NAME
} member;

typedef struct frame {
    uint8_t kind;      /* frame_kind */
    uint8_t is_map;
    uint8_t member;    /* member of the value that comes next (objects) */
    uint8_t level;     /* K_COORDS: 1 = the "coordinates" array itself */
    uint8_t gtype;     /* K_GEOM: type named by "type" (ST_GEOM_NULL: none) */
    uint8_t gflags;    /* K_GEOM: G_* bits; K_FEATURE/K_ROOT: F_* bits */
    uint32_t count;    /* K_CAPTURE: items written so far */
} frame;

#define G_TYPED 1u        /* "type" seen */
#define G_COORDS 2u       /* "coordinates" seen */
#define G_MEMBERS 4u      /* "geometries" seen */
#define F_TYPED 1u        /* K_FEATURE: "type": "Feature" seen */

/* What the top-level object turned out to be. */
typedef enum { ROOT_UNKNOWN, ROOT_COLLECTION, ROOT_FEATURE } root_kind;

typedef struct gj_reader {
    FILE *fp;
    int lines;                 /* 1: newline-delimited variant */
    yajl_handle yh;
    unsigned char *chunk;      /* GJ_CHUNK + 1 bytes */
    long long chunk_start;     /* file offset of chunk[0] */
    long long lines_before;    /* newlines before chunk[0] */
    int eof;                   /* the whole file was fed to YAJL */
    st_status failed;          /* sticky error, returned after the queue */
    st_reader *r;              /* back pointer (borrowed) */

    /* Token-length scan across chunks (bounds YAJL's own buffering). */
    int in_string, escaped;
    size_t toklen;
    int saw_content;           /* a non-blank byte was seen */

    /* Event state. */
    frame stack[GJ_MAX_DEPTH];
    int depth;
    root_kind root;
    int root_has_features;
    st_feature *cur;           /* feature being built, or NULL */
    uint64_t nfeatures;        /* features completed so far */
    size_t feature_text;       /* property bytes of cur */
    uint32_t prop_field;       /* field of the property value that comes next */
    uint32_t next_guess;       /* likely field of the next property name */
    uint8_t *typed;            /* per field: type settled by a non-null value */
    uint32_t typed_cap;
    st_buf capture;            /* nested property value, compact JSON */
    st_buf name;               /* NUL-terminated copy of a property name */
    int geom_level;            /* open K_GEOM frames */
    st_geom member;            /* a GeometryCollection member being read */
    int pos_depth;             /* coordinates level holding positions, 0 = not yet */
    int pos_count;             /* numbers in the current position */
    double pos[2];
    uint8_t pending[GJ_MAX_COORD_LEVEL + 1];  /* arrays opened, no position yet */

    /* Error raised inside a callback: code and text, placed after the parse. */
    st_status cb_code;
    char cb_msg[512];

    /* Ready features. */
    st_feature **queue;
    size_t qhead, qlen, qcap;
} gj_reader;

/* ---- errors ----------------------------------------------------------- */

/* Record an error from inside a callback; returns 0 so YAJL stops. */
static int cb_fail(gj_reader *g, st_status code, const char *fmt, ...) ST_PRINTF(3, 4);
static int cb_fail(gj_reader *g, st_status code, const char *fmt, ...)
{
    g->cb_code = code;
    va_list ap;
    va_start(ap, fmt);
    vsnprintf(g->cb_msg, sizeof g->cb_msg, fmt, ap);
    va_end(ap);
    return 0;
}

/* A failed st_* call inside a callback: out of memory needs no text. */
static int cb_status(gj_reader *g, st_status rc, const char *what)
{
    if (rc == ST_ERR_NOMEM)
        return cb_fail(g, rc, "out of memory");
    return cb_fail(g, rc, "%s", what);
}

/* Newlines in chunk[0..n). */
static long long count_lines(const unsigned char *s, size_t n)
{
    long long k = 0;
    for (const unsigned char *p = s; (p = memchr(p, '\n', (size_t)(s + n - p))); p++)
        k++;
    return k;
}

/*
** Add the diagnostic for an error at chunk position 'pos' (bytes of the
** current chunk already consumed). Line, byte offset and feature index go
** both into the location and into the text, so every rendering shows them.
*/
static st_status report(gj_reader *g, st_status code, size_t pos, const char *what)
{
    g->failed = code;
    if (code == ST_ERR_NOMEM)
        return code;
    long long offset = g->chunk_start + (long long)pos;
    long line = (long)(1 + g->lines_before + count_lines(g->chunk, pos));
    st_loc loc = {g->r->path, line, 0, 0, g->cur ? (long long)g->nfeatures : -1, offset};
    if (g->cur)
        st_diags_add(g->r->diags, ST_SEV_ERROR, code, &loc,
                     "feature %llu (byte %lld): %s",
                     (unsigned long long)g->nfeatures, offset, what);
    else
        st_diags_add(g->r->diags, ST_SEV_ERROR, code, &loc,
                     "byte %lld, after %llu feature%s: %s", offset,
                     (unsigned long long)g->nfeatures, g->nfeatures == 1 ? "" : "s",
                     what);
    return code;
}

/* YAJL's own message without its "parse error: " prefix and newline. */
static void yajl_reason(gj_reader *g, char *out, size_t n)
{
    unsigned char *e = yajl_get_error(g->yh, 0, NULL, 0);
    const char *s = e ? (const char *)e : "unreadable JSON";
    const char *colon = strstr(s, "error: ");
    if (colon)
        s = colon + 7;
    size_t len = strlen(s);
    while (len && (s[len - 1] == '\n' || s[len - 1] == ' ' || s[len - 1] == '.'))
        len--;
    snprintf(out, n, "%.*s", (int)len, s);
    if (e)
        yajl_free_error(g->yh, e);
}

/* Turn a YAJL result into a diagnostic. 'seg_start' is the chunk position
** of the segment fed to YAJL; -1 after yajl_complete_parse (the error is
** at the end of the file). */
static st_status parse_result(gj_reader *g, yajl_status ys, long seg_start)
{
    if (ys == yajl_status_ok)
        return ST_OK;
    size_t pos = seg_start < 0 ? 0 : (size_t)seg_start + yajl_get_bytes_consumed(g->yh);
    if (ys == yajl_status_client_canceled)
        return report(g, g->cb_code, pos, g->cb_msg);
    char reason[256], what[512];
    yajl_reason(g, reason, sizeof reason);
    if (strstr(reason, "premature EOF"))
        snprintf(what, sizeof what, "the JSON text ends too early (%s): "
                 "is the file truncated?", reason);
    else
        snprintf(what, sizeof what, "malformed JSON: %s", reason);
    return report(g, ST_ERR_FORMAT, pos, what);
}

/* ---- the queue of ready features -------------------------------------- */

static st_status queue_push(gj_reader *g, st_feature *f)
{
    if (g->qhead + g->qlen == g->qcap) {
        if (g->qhead) {
            memmove(g->queue, g->queue + g->qhead, g->qlen * sizeof *g->queue);
            g->qhead = 0;
        } else {
            size_t cap = g->qcap ? g->qcap * 2 : 16;
            st_feature **q = st_realloc(g->queue, cap * sizeof *q);
            if (!q)
                return ST_ERR_NOMEM;
            g->queue = q;
            g->qcap = cap;
        }
    }
    g->queue[g->qhead + g->qlen++] = f;
    return ST_OK;
}

static st_feature *queue_pop(gj_reader *g)
{
    if (!g->qlen)
        return NULL;
    st_feature *f = g->queue[g->qhead++];
    if (--g->qlen == 0)
        g->qhead = 0;
    return f;
}

/* ---- frames ------------------------------------------------------------ */

static frame *top(gj_reader *g)
{
    return g->depth ? &g->stack[g->depth - 1] : NULL;
}

static int push(gj_reader *g, frame_kind kind, int is_map)
{
    if (g->depth >= GJ_MAX_DEPTH)
        return cb_fail(g, ST_ERR_LIMIT, "arrays and objects are nested more "
                       "than %d deep (limit)", GJ_MAX_DEPTH);
    frame *f = &g->stack[g->depth++];
    memset(f, 0, sizeof *f);
    f->kind = (uint8_t)kind;
    f->is_map = (uint8_t)is_map;
    return 1;
}

/* ---- features and properties ------------------------------------------ */

static int begin_feature(gj_reader *g)
{
    st_feature_free(g->cur);
    g->cur = st_feature_new();
    g->feature_text = 0;
    return g->cur ? 1 : cb_status(g, ST_ERR_NOMEM, "");
}

static int finish_feature(gj_reader *g)
{
    st_status rc = queue_push(g, g->cur);
    if (rc != ST_OK)
        return cb_status(g, rc, "");
    g->cur = NULL;
    g->nfeatures++;
    return 1;
}

/* Keep the per-field "type settled" flags as long as the field list. */
static st_status ensure_typed(gj_reader *g, uint32_t count)
{
    if (count <= g->typed_cap)
        return ST_OK;
    uint32_t cap = g->typed_cap ? g->typed_cap * 2 : 32;
    while (cap < count)
        cap *= 2;
    uint8_t *t = st_realloc(g->typed, cap);
    if (!t)
        return ST_ERR_NOMEM;
    memset(t + g->typed_cap, 0, cap - g->typed_cap);
    g->typed = t;
    g->typed_cap = cap;
    return ST_OK;
}

/* Field index for a property name; names usually come in the same order
** in every feature, so the field after the previous one is tried first. */
/*
** Returns owned C string of the JSON string s[0..n): invalid UTF-8 and
** NUL bytes (an escaped \u0000, which a C string would silently cut
** short) each become U+FFFD. NULL on no memory.
*/
static char *text_copy(const char *s, size_t n)
{
    if (st_utf8_valid_prefix(s, n) == n && !memchr(s, 0, n))
        return st_strndup(s, n);
    st_buf b;
    st_buf_init(&b, 0);
    st_status rc = ST_OK;
    for (size_t at = 0; rc == ST_OK && at <= n;) {
        const char *nul = memchr(s + at, 0, n - at);
        size_t len = nul ? (size_t)(nul - (s + at)) : n - at;
        char *clean = st_utf8_sanitize(s + at, len);
        rc = clean ? st_buf_puts(&b, clean) : ST_ERR_NOMEM;
        st_free(clean);
        if (rc == ST_OK && nul)
            rc = st_buf_append(&b, "\xEF\xBF\xBD", 3);
        at += len + 1;
    }
    if (rc != ST_OK) {
        st_buf_free(&b);
        return NULL;
    }
    return st_buf_take(&b);
}

static int property_name(gj_reader *g, const unsigned char *key, size_t n)
{
    if (n > GJ_MAX_NAME)
        return cb_fail(g, ST_ERR_LIMIT, "a property name is longer than %d "
                       "bytes (limit)", GJ_MAX_NAME);
    st_buf_clear(&g->name);
    st_status rc;
    if (st_utf8_valid_prefix((const char *)key, n) == n && !memchr(key, 0, n)) {
        rc = st_buf_append(&g->name, (const char *)key, n);
    } else {
        char *clean = text_copy((const char *)key, n);
        rc = clean ? st_buf_puts(&g->name, clean) : ST_ERR_NOMEM;
        st_free(clean);
    }
    if (rc != ST_OK)
        return cb_status(g, rc, "");
    st_fields *fields = &g->r->fields;
    const char *name = g->name.data;
    uint32_t guess = g->next_guess;
    if (guess < fields->count && strcmp(fields->items[guess].name, name) == 0) {
        g->prop_field = guess;
    } else {
        int32_t at = st_fields_find(fields, name);
        if (at < 0) {
            if (fields->count >= GJ_MAX_FIELDS)
                return cb_fail(g, ST_ERR_LIMIT, "more than %d distinct property "
                               "names in the layer (limit)", GJ_MAX_FIELDS);
            rc = ensure_typed(g, fields->count + 1);
            if (rc == ST_OK)
                rc = st_fields_add(fields, name, ST_FIELD_TEXT, 0, 0, &g->prop_field);
            if (rc != ST_OK)
                return cb_status(g, rc, "");
        } else {
            g->prop_field = (uint32_t)at;
        }
    }
    g->next_guess = g->prop_field + 1;
    return 1;
}

/* Store the value of the current property (text borrowed, copied). */
static int property_value(gj_reader *g, st_field_type type, const char *s, size_t n)
{
    uint32_t i = g->prop_field;
    if (!s) {
        if (i < g->cur->nvalues) {   /* a repeated name: the last one wins */
            st_free(g->cur->values[i]);
            g->cur->values[i] = NULL;
        }
        return 1;
    }
    if (n > GJ_MAX_VALUE)
        return cb_fail(g, ST_ERR_LIMIT, "the value of property '%s' is longer "
                       "than 1 MiB (limit)", g->r->fields.items[i].name);
    g->feature_text += n;
    if (g->feature_text > GJ_MAX_FEATURE_TEXT)
        return cb_fail(g, ST_ERR_LIMIT, "the properties of one feature hold more "
                       "than 64 MiB of text (limit)");
    if (!g->typed[i]) {
        g->r->fields.items[i].type = type;
        g->typed[i] = 1;
    }
    st_status rc;
    if (type == ST_FIELD_TEXT && (st_utf8_valid_prefix(s, n) != n || memchr(s, 0, n))) {
        char *clean = text_copy(s, n);
        rc = clean ? st_feature_set_value(g->cur, i, clean, strlen(clean)) : ST_ERR_NOMEM;
        st_free(clean);
    } else {
        rc = st_feature_set_value(g->cur, i, s, n);
    }
    return rc == ST_OK ? 1 : cb_status(g, rc, "");
}

/* Integer or real by the literal; an integer of more than 18 digits (it
** may not fit in 64 bits) counts as real. */
static st_field_type number_type(const char *s, size_t n)
{
    size_t digits = 0;
    for (size_t k = 0; k < n; k++) {
        if (s[k] == '.' || s[k] == 'e' || s[k] == 'E')
            return ST_FIELD_REAL;
        if (s[k] >= '0' && s[k] <= '9')
            digits++;
    }
    return digits > 18 ? ST_FIELD_REAL : ST_FIELD_INTEGER;
}

/* ---- nested property values, re-serialised compactly ----------------- */

static st_status capture_string(st_buf *b, const char *s, size_t n)
{
    static const char hex[] = "0123456789abcdef";
    st_status rc = st_buf_append(b, "\"", 1);
    size_t run = 0;   /* bytes copied as they are, flushed before an escape */
    for (size_t k = 0; rc == ST_OK && k < n; k++) {
        unsigned char c = (unsigned char)s[k];
        if (c >= 0x20 && c != '"' && c != '\\') {
            run++;
            continue;
        }
        rc = st_buf_append(b, s + k - run, run);
        run = 0;
        char esc[7] = {'\\', (char)c, 0};
        size_t len = 2;
        if (c == '\n') esc[1] = 'n';
        else if (c == '\r') esc[1] = 'r';
        else if (c == '\t') esc[1] = 't';
        else if (c == '\b') esc[1] = 'b';
        else if (c == '\f') esc[1] = 'f';
        else if (c < 0x20) {
            memcpy(esc, "\\u00", 4);
            esc[4] = hex[c >> 4];
            esc[5] = hex[c & 15];
            len = 6;
        }
        if (rc == ST_OK)
            rc = st_buf_append(b, esc, len);
    }
    if (rc == ST_OK)
        rc = st_buf_append(b, s + n - run, run);
    return rc == ST_OK ? st_buf_append(b, "\"", 1) : rc;
}

/* A string for the capture: invalid UTF-8 replaced first. */
static st_status capture_text(st_buf *b, const char *s, size_t n)
{
    if (st_utf8_valid_prefix(s, n) == n)
        return capture_string(b, s, n);
    char *clean = st_utf8_sanitize(s, n);
    if (!clean)
        return ST_ERR_NOMEM;
    st_status rc = capture_string(b, clean, strlen(clean));
    st_free(clean);
    return rc;
}

static int capture_failed(gj_reader *g, st_status rc)
{
    if (rc == ST_ERR_LIMIT)
        return cb_fail(g, rc, "the value of property '%s' is longer than 1 MiB "
                       "as JSON text (limit)", g->r->fields.items[g->prop_field].name);
    return cb_status(g, rc, "");
}

/* ',' before an array item after the first (object members get theirs
** with the key). */
static st_status capture_separator(gj_reader *g, frame *f)
{
    if (f->is_map || f->count++ == 0)
        return ST_OK;
    return st_buf_append(&g->capture, ",", 1);
}

/* ---- coordinates ------------------------------------------------------- */

static st_geom *coords_target(gj_reader *g)
{
    return g->geom_level > 1 ? &g->member : &g->cur->geom;
}

/* A position array closed: open the pending part/ring, add the vertex. */
static int add_position(gj_reader *g)
{
    if (g->pos_count < 2)
        return cb_fail(g, ST_ERR_FORMAT, "a position has %d number%s; it needs "
                       "at least 2 (longitude, latitude)", g->pos_count,
                       g->pos_count == 1 ? "" : "s");
    st_geom *t = coords_target(g);
    if (t->ncoords >= GJ_MAX_COORDS)
        return cb_fail(g, ST_ERR_LIMIT, "the geometry has more than %u "
                       "coordinates (limit)", GJ_MAX_COORDS);
    int d = g->pos_depth;
    st_status rc = ST_OK;
    if (d >= 3 && g->pending[d - 2]) {
        rc = st_geom_begin_part(t);
        g->pending[d - 2] = 0;
    }
    if (rc == ST_OK && d >= 2 && g->pending[d - 1]) {
        rc = st_geom_begin_ring(t);
        g->pending[d - 1] = 0;
    }
    if (rc == ST_OK)
        rc = st_geom_add_xy(t, g->pos[0], g->pos[1]);
    if (rc == ST_OK && g->pos_count > 2)
        t->has_z = 1;
    g->pos_count = 0;
    return rc == ST_OK ? 1 : cb_status(g, rc, "too many coordinates");
}

static int coords_number(gj_reader *g, frame *f, const char *s, size_t n)
{
    if (g->pos_depth == 0)
        g->pos_depth = f->level;
    if (f->level != g->pos_depth)
        return cb_fail(g, ST_ERR_FORMAT, "\"coordinates\" mixes numbers and arrays "
                       "at different depths; a position is an array of numbers");
    if (g->pos_count < 2) {
        char tmp[128];
        if (n >= sizeof tmp)
            return cb_fail(g, ST_ERR_LIMIT, "a coordinate is written with more than "
                           "%zu characters (limit)", sizeof tmp - 1);
        memcpy(tmp, s, n);
        tmp[n] = '\0';
        g->pos[g->pos_count] = strtod(tmp, NULL);
    }
    if (g->pos_count < 1000)
        g->pos_count++;
    return 1;
}

static int coords_array(gj_reader *g, frame *f)
{
    int level = f->level + 1;
    if (level > GJ_MAX_COORD_LEVEL || (g->pos_depth && level > g->pos_depth))
        return cb_fail(g, ST_ERR_FORMAT, "\"coordinates\" are nested too deeply; "
                       "a position is an array of numbers");
    if (!push(g, K_COORDS, 0))
        return 0;
    top(g)->level = (uint8_t)level;
    g->pending[level] = 1;
    g->pos_count = 0;
    return 1;
}

/* ---- geometries ------------------------------------------------------- */

static st_geom_type geom_type_of(const char *s, size_t n)
{
    static const struct { const char *name; st_geom_type type; } types[] = {
        {"Point", ST_GEOM_POINT}, {"LineString", ST_GEOM_LINESTRING},
        {"Polygon", ST_GEOM_POLYGON}, {"MultiPoint", ST_GEOM_MULTIPOINT},
        {"MultiLineString", ST_GEOM_MULTILINESTRING},
        {"MultiPolygon", ST_GEOM_MULTIPOLYGON},
        {"GeometryCollection", ST_GEOM_COLLECTION}};
    for (size_t i = 0; i < sizeof types / sizeof types[0]; i++)
        if (strlen(types[i].name) == n && memcmp(types[i].name, s, n) == 0)
            return types[i].type;
    return ST_GEOM_OTHER;
}

/* Depth of the position arrays in "coordinates" for each type. */
static int coords_depth_of(st_geom_type t)
{
    switch (t) {
    case ST_GEOM_POINT: return 1;
    case ST_GEOM_LINESTRING: case ST_GEOM_MULTIPOINT: return 2;
    case ST_GEOM_POLYGON: case ST_GEOM_MULTILINESTRING: return 3;
    case ST_GEOM_MULTIPOLYGON: return 4;
    default: return 0;
    }
}

/*
** The builder makes the arrays at depth-1 rings and at depth-2 parts, which
** fits Point, LineString, Polygon and MultiPolygon. A MultiPoint is one part
** per point and a MultiLineString one part per line: split them here, once
** the type is known (it may come after "coordinates").
*/
static st_status split_into_parts(st_geom *t, int each_coord)
{
    uint32_t n = each_coord ? t->ncoords : t->nrings;
    uint32_t *rings = st_malloc(((size_t)n + 1) * sizeof *rings);
    uint32_t *parts = st_malloc(((size_t)n + 1) * sizeof *parts);
    if (!rings || !parts) {
        st_free(rings);
        st_free(parts);
        return ST_ERR_NOMEM;
    }
    for (uint32_t i = 0; i <= n; i++) {
        parts[i] = i;
        rings[i] = each_coord ? i : t->ring_coord[i];
    }
    st_free(t->part_ring);
    st_free(t->ring_coord);
    t->part_ring = parts;
    t->ring_coord = rings;
    t->nparts = t->nrings = n;
    t->cap_parts = t->cap_rings = n + 1;
    return ST_OK;
}

/* Append the parts of a polygonal collection member to the feature. */
static st_status append_parts(st_geom *dst, const st_geom *src)
{
    st_status rc = ST_OK;
    for (uint32_t p = 0; rc == ST_OK && p < src->nparts; p++) {
        rc = st_geom_begin_part(dst);
        for (uint32_t r = src->part_ring[p]; rc == ST_OK && r < src->part_ring[p + 1]; r++) {
            rc = st_geom_begin_ring(dst);
            for (uint32_t c = src->ring_coord[r]; rc == ST_OK && c < src->ring_coord[r + 1]; c++)
                rc = dst->ncoords >= GJ_MAX_COORDS ? ST_ERR_LIMIT
                     : st_geom_add_xy(dst, src->xy[2 * c], src->xy[2 * c + 1]);
        }
    }
    dst->has_z |= src->has_z;
    return rc;
}

/* A geometry object closed (frame 'f' already popped; geom_level counts it). */
static int finish_geometry(gj_reader *g, const frame *f)
{
    st_geom_type type = (st_geom_type)f->gtype;
    if (!(f->gflags & G_TYPED))
        return cb_fail(g, ST_ERR_FORMAT, "a geometry has no \"type\"");
    int nested = g->geom_level > 1;
    if ((f->gflags & G_MEMBERS) && type != ST_GEOM_COLLECTION)
        return cb_fail(g, ST_ERR_FORMAT, "a %s has \"geometries\"; only a "
                       "GeometryCollection has them", st_geom_type_name(type));
    if (type == ST_GEOM_COLLECTION) {
        if (f->gflags & G_COORDS)
            return cb_fail(g, ST_ERR_FORMAT, "a GeometryCollection has "
                           "\"coordinates\"; it takes \"geometries\"");
        if (!nested)
            g->cur->geom.type = ST_GEOM_COLLECTION;
        return 1;
    }
    st_geom *t = coords_target(g);
    if (type == ST_GEOM_OTHER) {
        st_geom_clear(t);   /* an unknown type: nothing is kept */
        t->type = ST_GEOM_OTHER;
    } else if (!(f->gflags & G_COORDS)) {
        return cb_fail(g, ST_ERR_FORMAT, "a %s has no \"coordinates\"",
                       st_geom_type_name(type));
    } else if (g->pos_depth && g->pos_depth != coords_depth_of(type)) {
        return cb_fail(g, ST_ERR_FORMAT, "a %s needs positions nested %d deep in "
                       "\"coordinates\", found %d", st_geom_type_name(type),
                       coords_depth_of(type), g->pos_depth);
    } else {
        st_status rc = ST_OK;
        if (type == ST_GEOM_MULTIPOINT && t->ncoords)
            rc = split_into_parts(t, 1);
        else if (type == ST_GEOM_MULTILINESTRING && t->nrings)
            rc = split_into_parts(t, 0);
        if (rc != ST_OK)
            return cb_status(g, rc, "");
        t->type = type;
    }
    if (nested) {
        st_status rc = ST_OK;
        if (type == ST_GEOM_POLYGON || type == ST_GEOM_MULTIPOLYGON)
            rc = append_parts(&g->cur->geom, t);
        st_geom_clear(t);
        if (rc != ST_OK)
            return cb_status(g, rc, "the geometry has too many coordinates (limit)");
    }
    return 1;
}

static int begin_geometry(gj_reader *g)
{
    if (!push(g, K_GEOM, 1))
        return 0;
    g->geom_level++;
    if (g->geom_level == 1)
        st_geom_clear(&g->cur->geom);
    g->pos_depth = 0;
    g->pos_count = 0;
    memset(g->pending, 0, sizeof g->pending);
    return 1;
}

/* ---- the legacy "crs" member ------------------------------------------ */

/*
** "urn:ogc:def:crs:EPSG::32643", "urn:ogc:def:crs:EPSG:6.6:4326",
** "http://www.opengis.net/def/crs/EPSG/0/3857" -> "EPSG:n";
** "urn:ogc:def:crs:OGC:1.3:CRS84" -> "OGC:CRS84"; anything else is passed
** on as written ("EPSG:3857" already is what PROJ takes).
*/
static char *crs_from_name(const char *s, size_t n)
{
    static const char urn[] = "urn:ogc:def:crs:";
    static const char http[] = "opengis.net/def/crs/";
    char sep = 0;
    const char *p = NULL;
    if (n > sizeof urn - 1 && strncmp(s, urn, sizeof urn - 1) == 0) {
        p = s + sizeof urn - 1;
        sep = ':';
    } else {
        const char *h = NULL;
        for (size_t i = 0; i + sizeof http - 1 <= n && !h; i++)
            if (memcmp(s + i, http, sizeof http - 1) == 0)
                h = s + i + sizeof http - 1;
        if (h) {
            p = h;
            sep = '/';
        }
    }
    if (!p)
        return st_strndup(s, n);
    const char *end = s + n;
    const char *auth_end = memchr(p, sep, (size_t)(end - p));
    const char *code = NULL;
    for (const char *q = end; q > p; q--)
        if (q[-1] == sep) {
            code = q;
            break;
        }
    if (!auth_end || !code || code <= auth_end || code == end)
        return st_strndup(s, n);
    return st_strdup_printf("%.*s:%.*s", (int)(auth_end - p), p, (int)(end - code), code);
}

static int crs_name(gj_reader *g, const char *s, size_t n)
{
    char *def = crs_from_name(s, n);
    if (!def)
        return cb_status(g, ST_ERR_NOMEM, "");
    st_reader *r = g->r;
    if (g->nfeatures > 0) {
        const char *in_use = r->crs_def ? r->crs_def : "OGC:CRS84";
        int same = strcmp(def, in_use) == 0;
        if (!same)
            cb_fail(g, ST_ERR_FORMAT, "the \"crs\" member (%s) comes after the "
                    "first feature; the features already read were taken as %s. "
                    "Put \"crs\" before \"features\"", def, in_use);
        st_free(def);
        return same;
    }
    st_free(r->crs_def);
    r->crs_def = def;
    return 1;
}

/* ---- values by position ----------------------------------------------- */

typedef enum { V_NULL, V_BOOL, V_NUMBER, V_STRING, V_MAP, V_ARRAY } value_kind;

static int skip_value(gj_reader *g, value_kind v)
{
    return v == V_MAP ? push(g, K_SKIP, 1) : v == V_ARRAY ? push(g, K_SKIP, 0) : 1;
}

static const char *value_name(value_kind v)
{
    static const char *const names[] = {"null", "a boolean", "a number",
                                        "a string", "an object", "an array"};
    return names[v];
}

/* A member of a Feature: "type", "id", "properties", "geometry". */
static int feature_member(gj_reader *g, frame *f, value_kind v, const char *s, size_t n)
{
    switch ((member)f->member) {
    case M_TYPE:
        if (v == V_STRING && !(n == 7 && memcmp(s, "Feature", 7) == 0))
            return cb_fail(g, ST_ERR_FORMAT, "a member of \"features\" has \"type\": "
                           "\"%.*s\"; expected \"Feature\"", (int)(n > 40 ? 40 : n), s);
        if (v != V_STRING)
            return cb_fail(g, ST_ERR_FORMAT, "a member of \"features\" has a \"type\" "
                           "that is %s; expected \"Feature\"", value_name(v));
        f->gflags |= F_TYPED;
        return 1;
    case M_ID:
        if (v == V_STRING || v == V_NUMBER) {
            st_free(g->cur->source_id);
            g->cur->source_id = text_copy(s, n);
            return g->cur->source_id ? 1 : cb_status(g, ST_ERR_NOMEM, "");
        }
        return skip_value(g, v);
    case M_PROPERTIES:
        if (v == V_MAP)
            return push(g, K_PROPS, 1);
        if (v == V_NULL)
            return 1;
        return cb_fail(g, ST_ERR_FORMAT, "\"properties\" is %s; expected an object "
                       "or null", value_name(v));
    case M_GEOMETRY:
        if (v == V_MAP)
            return begin_geometry(g);
        if (v == V_NULL) {
            st_geom_clear(&g->cur->geom);
            return 1;
        }
        return cb_fail(g, ST_ERR_FORMAT, "\"geometry\" is %s; expected an object "
                       "or null", value_name(v));
    default:
        return skip_value(g, v);
    }
}

static int root_type(gj_reader *g, value_kind v, const char *s, size_t n)
{
    if (v == V_STRING && n == 17 && memcmp(s, "FeatureCollection", 17) == 0) {
        g->root = ROOT_COLLECTION;
        st_feature_free(g->cur);   /* members seen so far were foreign */
        g->cur = NULL;
        return 1;
    }
    if (v == V_STRING && n == 7 && memcmp(s, "Feature", 7) == 0) {
        if (g->root_has_features)
            return cb_fail(g, ST_ERR_FORMAT, "the top-level object is a Feature "
                           "but has \"features\"");
        g->root = ROOT_FEATURE;
        return 1;
    }
    if (v == V_STRING)
        return cb_fail(g, ST_ERR_FORMAT, "the top-level object is a \"%.*s\"; "
                       "expected a FeatureCollection or a Feature",
                       (int)(n > 40 ? 40 : n), s);
    return cb_fail(g, ST_ERR_FORMAT, "the top-level \"type\" is %s; expected "
                   "\"FeatureCollection\" or \"Feature\"", value_name(v));
}

static int root_member(gj_reader *g, frame *f, value_kind v, const char *s, size_t n)
{
    switch ((member)f->member) {
    case M_TYPE:
        return root_type(g, v, s, n);
    case M_FEATURES:
        if (g->root == ROOT_FEATURE)
            return skip_value(g, v);
        if (v != V_ARRAY)
            return cb_fail(g, ST_ERR_FORMAT, "\"features\" is %s; expected an array",
                           value_name(v));
        st_feature_free(g->cur);
        g->cur = NULL;
        g->root_has_features = 1;
        return push(g, K_FEATURES, 0);
    case M_CRS:
        if (v == V_MAP)
            return push(g, K_CRS, 1);
        return skip_value(g, v);
    case M_ID: case M_PROPERTIES: case M_GEOMETRY:
        if (g->root == ROOT_COLLECTION || g->root_has_features)
            return skip_value(g, v);
        if (!g->cur && !begin_feature(g))
            return 0;
        return feature_member(g, f, v, s, n);
    default:
        return skip_value(g, v);
    }
}

static int props_value(gj_reader *g, value_kind v, const char *s, size_t n)
{
    switch (v) {
    case V_NULL: return property_value(g, ST_FIELD_TEXT, NULL, 0);
    case V_BOOL: return property_value(g, ST_FIELD_BOOLEAN, s, n);
    case V_NUMBER: return property_value(g, number_type(s, n), s, n);
    case V_STRING: return property_value(g, ST_FIELD_TEXT, s, n);
    case V_MAP: case V_ARRAY: break;
    }
    st_buf_clear(&g->capture);
    st_status rc = st_buf_append(&g->capture, v == V_MAP ? "{" : "[", 1);
    if (rc != ST_OK)
        return capture_failed(g, rc);
    return push(g, K_CAPTURE, v == V_MAP);
}

static int capture_value(gj_reader *g, frame *f, value_kind v, const char *s, size_t n)
{
    st_status rc = capture_separator(g, f);
    if (rc == ST_OK) {
        switch (v) {
        case V_NULL: rc = st_buf_append(&g->capture, "null", 4); break;
        case V_BOOL: case V_NUMBER: rc = st_buf_append(&g->capture, s, n); break;
        case V_STRING: rc = capture_text(&g->capture, s, n); break;
        case V_MAP: rc = st_buf_append(&g->capture, "{", 1); break;
        case V_ARRAY: rc = st_buf_append(&g->capture, "[", 1); break;
        }
    }
    if (rc != ST_OK)
        return capture_failed(g, rc);
    if (v == V_MAP || v == V_ARRAY)
        return push(g, K_CAPTURE, v == V_MAP);
    return 1;
}

static int geom_member(gj_reader *g, frame *f, value_kind v, const char *s, size_t n)
{
    switch ((member)f->member) {
    case M_TYPE:
        if (v != V_STRING)
            return cb_fail(g, ST_ERR_FORMAT, "a geometry's \"type\" is %s; expected "
                           "a string", value_name(v));
        f->gtype = (uint8_t)geom_type_of(s, n);
        f->gflags |= G_TYPED;
        return 1;
    case M_COORDINATES:
        if (v != V_ARRAY)
            return cb_fail(g, ST_ERR_FORMAT, "\"coordinates\" is %s; expected an "
                           "array", value_name(v));
        if (f->gflags & G_COORDS)
            return cb_fail(g, ST_ERR_FORMAT, "a geometry has \"coordinates\" twice");
        f->gflags |= G_COORDS;
        if (!push(g, K_COORDS, 0))
            return 0;
        top(g)->level = 1;
        g->pending[1] = 1;
        return 1;
    case M_GEOMETRIES:
        if (v != V_ARRAY)
            return cb_fail(g, ST_ERR_FORMAT, "\"geometries\" is %s; expected an "
                           "array", value_name(v));
        f->gflags |= G_MEMBERS;
        return push(g, K_GEOMS, 0);
    default:
        return skip_value(g, v);
    }
}

/* Every value event comes here, with what holds it on top of the stack. */
static int on_value(gj_reader *g, value_kind v, const char *s, size_t n)
{
    frame *f = top(g);
    if (!f) {
        if (v != V_MAP)
            return cb_fail(g, ST_ERR_FORMAT, "the file starts with %s; expected "
                           "a GeoJSON object (a FeatureCollection or a Feature)",
                           value_name(v));
        g->root = ROOT_UNKNOWN;
        g->root_has_features = 0;
        return push(g, K_ROOT, 1);
    }
    switch ((frame_kind)f->kind) {
    case K_SKIP:
        return skip_value(g, v);
    case K_ROOT:
        return root_member(g, f, v, s, n);
    case K_FEATURES:
        if (v != V_MAP)
            return cb_fail(g, ST_ERR_FORMAT, "a member of \"features\" is %s; "
                           "expected a Feature object", value_name(v));
        return begin_feature(g) && push(g, K_FEATURE, 1);
    case K_FEATURE:
        return feature_member(g, f, v, s, n);
    case K_PROPS:
        return props_value(g, v, s, n);
    case K_CAPTURE:
        return capture_value(g, f, v, s, n);
    case K_GEOM:
        return geom_member(g, f, v, s, n);
    case K_COORDS:
        if (v == V_NUMBER)
            return coords_number(g, f, s, n);
        if (v == V_ARRAY)
            return coords_array(g, f);
        return cb_fail(g, ST_ERR_FORMAT, "\"coordinates\" hold %s; expected numbers "
                       "in arrays", value_name(v));
    case K_GEOMS:
        if (v != V_MAP)
            return cb_fail(g, ST_ERR_FORMAT, "a member of \"geometries\" is %s; "
                           "expected a geometry object", value_name(v));
        return begin_geometry(g);
    case K_CRS:
        if (f->member == M_PROPERTIES && v == V_MAP)
            return push(g, K_CRS_PROPS, 1);
        return skip_value(g, v);
    case K_CRS_PROPS:
        if (f->member == M_NAME && v == V_STRING)
            return crs_name(g, s, n);
        return skip_value(g, v);
    }
    return 1;
}

/* ---- YAJL callbacks ---------------------------------------------------- */

static int on_null(void *ctx) { return on_value(ctx, V_NULL, NULL, 0); }

static int on_bool(void *ctx, int b)
{
    return on_value(ctx, V_BOOL, b ? "true" : "false", b ? 4 : 5);
}

static int on_number(void *ctx, const char *s, size_t n)
{
    return on_value(ctx, V_NUMBER, s, n);
}

static int on_string(void *ctx, const unsigned char *s, size_t n)
{
    return on_value(ctx, V_STRING, (const char *)s, n);
}

static int on_start_map(void *ctx) { return on_value(ctx, V_MAP, NULL, 0); }
static int on_start_array(void *ctx) { return on_value(ctx, V_ARRAY, NULL, 0); }

static member member_of(frame_kind kind, const char *s, size_t n)
{
    static const struct { const char *name; member m; } names[] = {
        {"type", M_TYPE}, {"id", M_ID}, {"features", M_FEATURES}, {"crs", M_CRS},
        {"properties", M_PROPERTIES}, {"geometry", M_GEOMETRY},
        {"coordinates", M_COORDINATES}, {"geometries", M_GEOMETRIES},
        {"name", M_NAME}};
    for (size_t i = 0; i < sizeof names / sizeof names[0]; i++)
        if (strlen(names[i].name) == n && memcmp(names[i].name, s, n) == 0) {
            member m = names[i].m;
            /* Only the members that matter where they appear. */
            switch (kind) {
            case K_ROOT: return m == M_COORDINATES || m == M_GEOMETRIES || m == M_NAME ? M_OTHER : m;
            case K_FEATURE: return m == M_TYPE || m == M_ID || m == M_PROPERTIES || m == M_GEOMETRY ? m : M_OTHER;
            case K_GEOM: return m == M_TYPE || m == M_COORDINATES || m == M_GEOMETRIES ? m : M_OTHER;
            case K_CRS: return m == M_PROPERTIES ? m : M_OTHER;
            case K_CRS_PROPS: return m == M_NAME ? m : M_OTHER;
            default: return M_OTHER;
            }
        }
    return M_OTHER;
}

static int on_key(void *ctx, const unsigned char *key, size_t n)
{
    gj_reader *g = ctx;
    frame *f = top(g);
    switch ((frame_kind)f->kind) {
    case K_PROPS:
        return property_name(g, key, n);
    case K_CAPTURE: {
        st_status rc = f->count++ ? st_buf_append(&g->capture, ",", 1) : ST_OK;
        if (rc == ST_OK)
            rc = capture_text(&g->capture, (const char *)key, n);
        if (rc == ST_OK)
            rc = st_buf_append(&g->capture, ":", 1);
        return rc == ST_OK ? 1 : capture_failed(g, rc);
    }
    case K_SKIP:
        return 1;
    default:
        f->member = (uint8_t)member_of((frame_kind)f->kind, (const char *)key, n);
        return 1;
    }
}

static int finish_root(gj_reader *g)
{
    if (g->root == ROOT_FEATURE)
        return (g->cur || begin_feature(g)) && finish_feature(g);
    st_feature_free(g->cur);
    g->cur = NULL;
    if (!g->root_has_features)
        return cb_fail(g, ST_ERR_FORMAT, g->root == ROOT_COLLECTION
                       ? "the FeatureCollection has no \"features\" array"
                       : "the top-level object has no \"type\" and no \"features\"; "
                         "expected a FeatureCollection or a Feature");
    return 1;
}

static int on_end(void *ctx)
{
    gj_reader *g = ctx;
    frame f = g->stack[--g->depth];
    switch ((frame_kind)f.kind) {
    case K_ROOT:
        return finish_root(g);
    case K_FEATURE:
        if (!(f.gflags & F_TYPED))
            return cb_fail(g, ST_ERR_FORMAT, "a member of \"features\" has no "
                           "\"type\": \"Feature\"");
        return finish_feature(g);
    case K_CAPTURE: {
        st_status rc = st_buf_append(&g->capture, f.is_map ? "}" : "]", 1);
        if (rc != ST_OK)
            return capture_failed(g, rc);
        if (top(g)->kind == K_PROPS)
            return property_value(g, ST_FIELD_JSON, g->capture.data, g->capture.len);
        return 1;
    }
    case K_GEOM: {
        int ok = finish_geometry(g, &f);
        g->geom_level--;
        return ok;
    }
    case K_COORDS:
        if (f.level == g->pos_depth)
            return add_position(g);
        return 1;
    default:
        return 1;
    }
}

static const yajl_callbacks callbacks = {
    on_null, on_bool, NULL, NULL, on_number, on_string,
    on_start_map, on_key, on_end, on_start_array, on_end};

/* ---- feeding the parser ------------------------------------------------ */

static int is_blank(unsigned char c)
{
    return c == ' ' || c == '\t' || c == '\n' || c == '\r';
}

/*
** Scan chunk[from..n) for a string or number longer than GJ_MAX_TOKEN
** (YAJL would buffer it whole) and, in the newline-delimited variant, for
** a record separator outside strings. Returns the position where feeding
** must pause: n, the separator, or the byte over the limit (*over set).
*/
static size_t scan(gj_reader *g, size_t from, size_t n, int *over)
{
    *over = 0;
    for (size_t i = from; i < n; i++) {
        unsigned char c = g->chunk[i];
        if (g->in_string) {
            if (g->escaped)
                g->escaped = 0;
            else if (c == '\\')
                g->escaped = 1;
            else if (c == '"')
                g->in_string = 0;
            if (g->in_string && ++g->toklen > GJ_MAX_TOKEN) {
                *over = 1;
                return i;
            }
            continue;
        }
        if (c == 0x1E && g->lines)
            return i;
        if (is_blank(c)) {
            g->toklen = 0;
            continue;
        }
        g->saw_content = 1;
        if (c == '"') {
            g->in_string = 1;
            g->toklen = 0;
        } else if (c && strchr("{}[],:", c)) {
            g->toklen = 0;
        } else if (++g->toklen > GJ_MAX_TOKEN) {
            *over = 1;
            return i;
        }
    }
    return n;
}

/* Feed chunk[0..n) to YAJL, skipping record separators. */
static st_status feed_chunk(gj_reader *g, size_t n)
{
    size_t pos = 0;
    if (g->chunk_start == 0 && n >= 3 && memcmp(g->chunk, "\xEF\xBB\xBF", 3) == 0)
        pos = 3;   /* a UTF-8 byte-order mark is not JSON; tolerate it */
    while (pos < n) {
        int over;
        size_t stop = scan(g, pos, n, &over);
        if (stop > pos) {
            yajl_status ys = yajl_parse(g->yh, g->chunk + pos, stop - pos);
            st_status rc = parse_result(g, ys, (long)pos);
            if (rc != ST_OK)
                return rc;
        }
        if (over)
            return report(g, ST_ERR_LIMIT, stop, "a string or number is longer "
                          "than 1 MiB (limit)");
        pos = stop < n ? stop + 1 : n;   /* past the record separator */
    }
    return ST_OK;
}

static st_status read_chunk(gj_reader *g)
{
    size_t n = fread(g->chunk, 1, GJ_CHUNK, g->fp);
    if (n < GJ_CHUNK && ferror(g->fp)) {
        g->failed = ST_ERR_IO;
        return st_reader_fail(g->r, ST_ERR_IO, -1, "read error after byte %lld: %s",
                              g->chunk_start, strerror(errno));
    }
    g->chunk[n] = '\0';
    st_status rc = ST_OK;
    if (n)
        rc = feed_chunk(g, n);
    if (rc != ST_OK)
        return rc;
    g->lines_before += count_lines(g->chunk, n);
    g->chunk_start += (long long)n;
    g->r->bytes_done = g->chunk_start;
    if (n < GJ_CHUNK) {
        g->eof = 1;
        return ST_OK;
    }
    return ST_OK;
}

/* At the end of the file: the last token, and a document at all. */
static st_status finish_file(gj_reader *g)
{
    if (!g->saw_content) {
        if (g->lines)
            return ST_OK;   /* an empty sequence is an empty layer */
        return report(g, ST_ERR_FORMAT, 0, "the file is empty; expected a "
                      "FeatureCollection");
    }
    yajl_status ys = yajl_complete_parse(g->yh);
    return parse_result(g, ys, -1);
}

/* Parse until a feature is ready, the file ends, or an error. */
static st_status fill(gj_reader *g)
{
    while (!g->qlen && !g->eof && g->failed == ST_OK) {
        st_status rc = read_chunk(g);
        if (rc == ST_OK && g->eof)
            rc = finish_file(g);
        if (rc != ST_OK) {
            g->failed = rc;
            return rc;
        }
    }
    return g->failed;
}

/* ---- the format table -------------------------------------------------- */

static void gj_free(gj_reader *g)
{
    if (!g)
        return;
    if (g->fp)
        fclose(g->fp);
    if (g->yh)
        yajl_free(g->yh);
    st_free(g->chunk);
    st_feature_free(g->cur);
    while (g->qlen)
        st_feature_free(queue_pop(g));
    st_free(g->queue);
    st_free(g->typed);
    st_buf_free(&g->capture);
    st_buf_free(&g->name);
    st_geom_clear(&g->member);
    st_free(g);
}

static st_status open_common(st_reader *r, int lines)
{
    gj_reader *g = st_calloc(1, sizeof *g);
    if (!g)
        return ST_ERR_NOMEM;
    r->impl = g;
    g->r = r;
    g->lines = lines;
    st_buf_init(&g->capture, GJ_MAX_VALUE);
    st_buf_init(&g->name, 0);
    st_geom_init(&g->member);
    r->schema_fixed = 0;
    r->count_hint = -1;
    g->fp = fopen(r->path, "rb");
    if (!g->fp)
        return st_reader_fail(r, ST_ERR_IO, -1, "cannot open: %s", strerror(errno));
    struct stat st;
    if (fstat(fileno(g->fp), &st) == 0)
        r->bytes_total = (long long)st.st_size;
    g->chunk = st_malloc(GJ_CHUNK + 1);
    g->yh = yajl_alloc(&callbacks, NULL, g);
    if (!g->chunk || !g->yh)
        return ST_ERR_NOMEM;
    /* Strings are checked by us (invalid UTF-8 is replaced, not fatal). */
    yajl_config(g->yh, yajl_dont_validate_strings, 1);
    if (lines)
        yajl_config(g->yh, yajl_allow_multiple_values, 1);
    /* The CRS must be known when open returns: read up to the first
    ** feature, so that a "crs" member before it is honoured. */
    st_status rc = fill(g);
    if (rc != ST_OK && !g->qlen)
        return rc;
    if (!r->crs_def && !(r->crs_def = st_strdup("OGC:CRS84")))
        return ST_ERR_NOMEM;
    return ST_OK;
}

static st_status gj_next(st_reader *r, st_feature **out)
{
    gj_reader *g = r->impl;
    *out = NULL;
    if (!g->qlen) {
        st_status rc = fill(g);
        if (rc != ST_OK && !g->qlen)
            return rc;
    }
    *out = queue_pop(g);
    return ST_OK;
}

static void gj_close(st_reader *r)
{
    gj_free(r->impl);
    r->impl = NULL;
}

/* 1 if the extension of 'path' is 'ext' (ASCII case-insensitive). */
static int has_ext(const char *path, const char *ext)
{
    const char *e = st_path_ext(path);
    return strlen(e) == strlen(ext) && st_str_ends_with_ci(e, ext);
}

static int geojson_probe(const char *path)
{
    return has_ext(path, ".geojson") || has_ext(path, ".json");
}

static int geojsonl_probe(const char *path)
{
    return has_ext(path, ".geojsonl") || has_ext(path, ".geojsons") ||
           has_ext(path, ".ndjson");
}

static st_status geojson_open(st_reader *r) { return open_common(r, 0); }
static st_status geojsonl_open(st_reader *r) { return open_common(r, 1); }

const st_reader_format st_geojson_reader_format = {
    "geojson", geojson_probe, geojson_open, gj_next, gj_close};
const st_reader_format st_geojsonl_reader_format = {
    "geojsonl", geojsonl_probe, geojsonl_open, gj_next, gj_close};
