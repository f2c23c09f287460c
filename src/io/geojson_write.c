/*
** io/geojson_write.c -- writers for GeoJSON (an RFC 7946 FeatureCollection)
** and newline-delimited GeoJSON (one Feature per line).
**
** Input:   one layer of features in lon/lat WGS 84, written as they come:
**          nothing of the layer is buffered beyond the feature at hand.
** Output:  .geojson/.json: one FeatureCollection, a feature a line.
**          .geojsonl/.ndjson: one Feature a line; .geojsons: the same with
**          an RS (0x1E) before each, as RFC 8142 text sequences have it.
**          RFC 7946 text: no "crs" member (Appendix B.1); exterior rings
**          counter-clockwise and holes clockwise (section 3.1.6), on a
**          copy of each geometry; coordinates as the shortest of %.15g,
**          %.16g and %.17g that reads back to the same double, so a round
**          trip keeps every coordinate exactly. Properties by field type:
**          INTEGER/REAL as JSON numbers when the text is one (else as a
**          string), BOOLEAN as true/false (common spellings such as "T",
**          "yes", "1" understood; anything else as a string), JSON fields
**          embedded when the text is valid JSON (checked and compacted with
**          YAJL; else a string), TEXT as a string (invalid UTF-8 replaced
**          by U+FFFD). A missing value is null. source_id becomes "id": a
**          number when it is a valid JSON number, else a string. Z values
**          are not written (footprints are 2-D). A GeometryCollection is
**          written with its (polygonal) parts as Polygon members;
**          ST_GEOM_OTHER, which keeps no coordinates, as null.
** Errors:  a NaN or infinite coordinate cannot be written in JSON: the
**          feature is refused (ST_ERR_FORMAT naming the feature). Every
**          write is checked, and so are fflush and fclose (ST_ERR_IO). The
**          generic writer renames the temporary file on commit and removes
**          it otherwise.
** Memory:  YAJL's generator uses the C allocator (see geojson_read.c: YAJL
**          does not check its own allocations). Coordinates are printed
**          with snprintf/strtod in the "C" numeric locale.
*/
#include <errno.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <strings.h>

#include <yajl/yajl_gen.h>
#include <yajl/yajl_parse.h>

#include "ioInt.h"

typedef struct gj_writer {
    FILE *fp;
    int lines;              /* 1: newline-delimited variant */
    int record_sep;         /* 1: RS before each line (.geojsons, RFC 8142) */
    yajl_gen gen;           /* one feature at a time */
    yajl_gen scratch;       /* JSON field values, checked and compacted */
    st_fields fields;       /* the layer's fields (copied) */
    int header_done, footer_done;
    uint64_t written;       /* features written */
    st_geom oriented;       /* copy of the geometry with RFC 7946 winding */
} gj_writer;

#define OK(call) ((call) == yajl_gen_status_ok)

/* ---- checked output ----------------------------------------------------- */

static st_status put(st_writer *w, const char *s, size_t n)
{
    gj_writer *j = w->impl;
    if (n && fwrite(s, 1, n, j->fp) != n)
        return st_writer_fail(w, ST_ERR_IO, "cannot write: %s", strerror(errno));
    return ST_OK;
}

static st_status put_header(st_writer *w)
{
    gj_writer *j = w->impl;
    if (j->lines || j->header_done)
        return ST_OK;
    j->header_done = 1;
    static const char head[] = "{\"type\":\"FeatureCollection\",\"features\":[\n";
    return put(w, head, sizeof head - 1);
}

static st_status put_footer(st_writer *w)
{
    gj_writer *j = w->impl;
    if (j->lines || j->footer_done)
        return ST_OK;
    st_status rc = put_header(w);
    j->footer_done = 1;
    if (rc != ST_OK)
        return rc;
    return j->written ? put(w, "\n]}\n", 4) : put(w, "]}\n", 3);
}

/* ---- values ------------------------------------------------------------ */

/* 1 if s is a JSON number (RFC 8259 section 6) and nothing else. */
static int is_json_number(const char *s)
{
    const char *p = s;
    if (*p == '-')
        p++;
    if (*p == '0')
        p++;
    else if (*p >= '1' && *p <= '9')
        while (*p >= '0' && *p <= '9')
            p++;
    else
        return 0;
    if (*p == '.') {
        p++;
        if (!(*p >= '0' && *p <= '9'))
            return 0;
        while (*p >= '0' && *p <= '9')
            p++;
    }
    if (*p == 'e' || *p == 'E') {
        p++;
        if (*p == '+' || *p == '-')
            p++;
        if (!(*p >= '0' && *p <= '9'))
            return 0;
        while (*p >= '0' && *p <= '9')
            p++;
    }
    return *p == '\0';
}

/* Shortest "%.15g".."%.17g" text of a finite v that reads back as v. */
static int format_coord(double v, char *buf, size_t n)
{
    int len = 0;
    for (int prec = 15; prec <= 17; prec++) {
        len = snprintf(buf, n, "%.*g", prec, v);
        if (strtod(buf, NULL) == v)
            break;
    }
    return len;
}

static int gen_text(yajl_gen gen, const char *s)
{
    size_t n = strlen(s);
    if (st_utf8_valid_prefix(s, n) == n)
        return OK(yajl_gen_string(gen, (const unsigned char *)s, n));
    char *clean = st_utf8_sanitize(s, n);
    if (!clean)
        return 0;
    int ok = OK(yajl_gen_string(gen, (const unsigned char *)clean, strlen(clean)));
    st_free(clean);
    return ok;
}

/* Re-emit parse events into a generator: validates and compacts JSON. */
static int re_null(void *g) { return OK(yajl_gen_null(g)); }
static int re_bool(void *g, int b) { return OK(yajl_gen_bool(g, b)); }
static int re_number(void *g, const char *s, size_t n) { return OK(yajl_gen_number(g, s, n)); }
static int re_string(void *g, const unsigned char *s, size_t n) { return OK(yajl_gen_string(g, s, n)); }
static int re_map_open(void *g) { return OK(yajl_gen_map_open(g)); }
static int re_map_close(void *g) { return OK(yajl_gen_map_close(g)); }
static int re_array_open(void *g) { return OK(yajl_gen_array_open(g)); }
static int re_array_close(void *g) { return OK(yajl_gen_array_close(g)); }

static const yajl_callbacks regenerate = {
    re_null, re_bool, NULL, NULL, re_number, re_string,
    re_map_open, re_string, re_map_close, re_array_open, re_array_close};

/* Embed 's' as JSON when it is valid JSON (compacted), else as a string. */
static int gen_json(gj_writer *j, const char *s)
{
    yajl_gen_reset(j->scratch, NULL);
    yajl_gen_clear(j->scratch);
    yajl_handle h = yajl_alloc(&regenerate, NULL, j->scratch);
    if (!h)
        return 0;
    size_t n = strlen(s);
    int valid = yajl_parse(h, (const unsigned char *)s, n) == yajl_status_ok &&
                yajl_complete_parse(h) == yajl_status_ok;
    yajl_free(h);
    const unsigned char *buf;
    size_t len;
    if (valid && OK(yajl_gen_get_buf(j->scratch, &buf, &len)))
        return OK(yajl_gen_number(j->gen, (const char *)buf, len));
    return gen_text(j->gen, s);
}

/* true/false for the usual spellings of a logical value, else -1. */
static int parse_bool(const char *s)
{
    static const char *const yes[] = {"true", "t", "yes", "y", "1"};
    static const char *const no[] = {"false", "f", "no", "n", "0"};
    for (size_t i = 0; i < sizeof yes / sizeof yes[0]; i++) {
        if (strcasecmp(s, yes[i]) == 0)
            return 1;
        if (strcasecmp(s, no[i]) == 0)
            return 0;
    }
    return -1;
}

static int gen_value(gj_writer *j, st_field_type type, const char *v)
{
    if (!v)
        return OK(yajl_gen_null(j->gen));
    switch (type) {
    case ST_FIELD_INTEGER:
    case ST_FIELD_REAL:
        if (is_json_number(v))
            return OK(yajl_gen_number(j->gen, v, strlen(v)));
        break;
    case ST_FIELD_BOOLEAN: {
        int b = parse_bool(v);
        if (b >= 0)
            return OK(yajl_gen_bool(j->gen, b));
        break;
    }
    case ST_FIELD_JSON:
        return gen_json(j, v);
    case ST_FIELD_TEXT:
        break;
    }
    return gen_text(j->gen, v);
}

static int gen_properties(gj_writer *j, const st_feature *f)
{
    int ok = gen_text(j->gen, "properties") && OK(yajl_gen_map_open(j->gen));
    for (uint32_t i = 0; ok && i < j->fields.count; i++) {
        const st_field *fd = &j->fields.items[i];
        ok = gen_text(j->gen, fd->name) && gen_value(j, fd->type, st_feature_value(f, i));
    }
    return ok && OK(yajl_gen_map_close(j->gen));
}

/* ---- geometry ------------------------------------------------------------ */

static int gen_position(yajl_gen gen, const st_geom *g, uint32_t c)
{
    char buf[40];
    int ok = OK(yajl_gen_array_open(gen));
    for (int k = 0; ok && k < 2; k++) {
        int len = format_coord(g->xy[2 * c + k], buf, sizeof buf);
        ok = OK(yajl_gen_number(gen, buf, (size_t)len));
    }
    return ok && OK(yajl_gen_array_close(gen));
}

static int gen_ring(yajl_gen gen, const st_geom *g, uint32_t r)
{
    int ok = OK(yajl_gen_array_open(gen));
    for (uint32_t c = g->ring_coord[r]; ok && c < g->ring_coord[r + 1]; c++)
        ok = gen_position(gen, g, c);
    return ok && OK(yajl_gen_array_close(gen));
}

static int gen_polygon(yajl_gen gen, const st_geom *g, uint32_t p)
{
    int ok = OK(yajl_gen_array_open(gen));
    for (uint32_t r = g->part_ring[p]; ok && r < g->part_ring[p + 1]; r++)
        ok = gen_ring(gen, g, r);
    return ok && OK(yajl_gen_array_close(gen));
}

/* "coordinates" of a geometry of one of the six simple types. */
static int gen_coordinates(yajl_gen gen, const st_geom *g)
{
    int ok = gen_text(gen, "coordinates");
    if (ok && (g->nparts == 0 || g->ncoords == 0))   /* empty: RFC 7946 3.1 */
        return OK(yajl_gen_array_open(gen)) && OK(yajl_gen_array_close(gen));
    switch (g->type) {
    case ST_GEOM_POINT:
        return ok && gen_position(gen, g, 0);
    case ST_GEOM_LINESTRING:
        return ok && gen_ring(gen, g, 0);
    case ST_GEOM_POLYGON:
        return ok && gen_polygon(gen, g, 0);
    default:
        break;
    }
    ok = ok && OK(yajl_gen_array_open(gen));
    for (uint32_t p = 0; ok && p < g->nparts; p++) {
        uint32_t r = g->part_ring[p];
        if (r == g->part_ring[p + 1])
            continue;   /* a part without rings (never made by our readers) */
        if (g->type == ST_GEOM_MULTIPOINT)
            ok = g->ring_coord[r] == g->ring_coord[r + 1] ||
                 gen_position(gen, g, g->ring_coord[r]);
        else if (g->type == ST_GEOM_MULTILINESTRING)
            ok = gen_ring(gen, g, r);
        else
            ok = gen_polygon(gen, g, p);
    }
    return ok && OK(yajl_gen_array_close(gen));
}

static const char *geojson_type(st_geom_type t)
{
    switch (t) {
    case ST_GEOM_POINT: return "Point";
    case ST_GEOM_LINESTRING: return "LineString";
    case ST_GEOM_POLYGON: return "Polygon";
    case ST_GEOM_MULTIPOINT: return "MultiPoint";
    case ST_GEOM_MULTILINESTRING: return "MultiLineString";
    case ST_GEOM_MULTIPOLYGON: return "MultiPolygon";
    case ST_GEOM_COLLECTION: return "GeometryCollection";
    default: return NULL;
    }
}

/* The parts of a collection, each a Polygon member. */
static int gen_collection(yajl_gen gen, const st_geom *g)
{
    int ok = gen_text(gen, "geometries") && OK(yajl_gen_array_open(gen));
    for (uint32_t p = 0; ok && p < g->nparts; p++)
        ok = OK(yajl_gen_map_open(gen)) && gen_text(gen, "type") &&
             gen_text(gen, "Polygon") && gen_text(gen, "coordinates") &&
             gen_polygon(gen, g, p) && OK(yajl_gen_map_close(gen));
    return ok && OK(yajl_gen_array_close(gen));
}

static int gen_geometry(yajl_gen gen, const st_geom *g)
{
    const char *type = geojson_type(g->type);
    if (!gen_text(gen, "geometry"))
        return 0;
    if (!type)
        return OK(yajl_gen_null(gen));
    int ok = OK(yajl_gen_map_open(gen)) && gen_text(gen, "type") && gen_text(gen, type);
    if (ok)
        ok = g->type == ST_GEOM_COLLECTION ? gen_collection(gen, g) : gen_coordinates(gen, g);
    return ok && OK(yajl_gen_map_close(gen));
}

/* ---- features ------------------------------------------------------------ */

/* Diagnostic about the feature being written (named by position and id). */
static st_status feature_fail(st_writer *w, const st_feature *f, st_status code,
                              const char *what)
{
    gj_writer *j = w->impl;
    st_loc loc = ST_LOC_FEATURE(w->path, (long long)j->written);
    return st_diags_add(w->diags, ST_SEV_ERROR, code, &loc,
                        "feature %llu%s%s%s: %s", (unsigned long long)j->written,
                        f->source_id ? " (id " : "", f->source_id ? f->source_id : "",
                        f->source_id ? ")" : "", what);
}

static st_status check_finite(st_writer *w, const st_feature *f)
{
    const st_geom *g = &f->geom;
    for (uint32_t i = 0; i < 2 * g->ncoords; i++)
        if (!isfinite(g->xy[i])) {
            char what[160];
            snprintf(what, sizeof what, "coordinate %u is %s; GeoJSON cannot hold "
                     "NaN or infinity, so the feature is not written", i / 2 + 1,
                     isnan(g->xy[i]) ? "NaN" : "infinite");
            return feature_fail(w, f, ST_ERR_FORMAT, what);
        }
    return ST_OK;
}

/* The Feature object as one line of compact JSON in j->gen's buffer. */
static int gen_feature(gj_writer *j, const st_feature *f, const st_geom *geom)
{
    yajl_gen gen = j->gen;
    int ok = OK(yajl_gen_map_open(gen)) && gen_text(gen, "type") && gen_text(gen, "Feature");
    if (ok && f->source_id) {
        ok = gen_text(gen, "id");
        if (ok)
            ok = is_json_number(f->source_id)
                 ? OK(yajl_gen_number(gen, f->source_id, strlen(f->source_id)))
                 : gen_text(gen, f->source_id);
    }
    return ok && gen_properties(j, f) && gen_geometry(gen, geom) &&
           OK(yajl_gen_map_close(gen));
}

static st_status gj_write(st_writer *w, const st_feature *f)
{
    gj_writer *j = w->impl;
    st_status rc = check_finite(w, f);
    if (rc != ST_OK)
        return rc;
    rc = st_geom_copy(&j->oriented, &f->geom);
    if (rc != ST_OK)
        return rc;
    st_geom_orient(&j->oriented, 1);
    yajl_gen_reset(j->gen, NULL);
    yajl_gen_clear(j->gen);
    if (!gen_feature(j, f, &j->oriented))
        return feature_fail(w, f, ST_ERR_NOMEM, "the JSON text could not be generated");
    const unsigned char *buf;
    size_t len;
    if (!OK(yajl_gen_get_buf(j->gen, &buf, &len)))
        return feature_fail(w, f, ST_ERR_NOMEM, "the JSON text could not be generated");
    rc = put_header(w);
    if (rc == ST_OK && j->written && !j->lines)
        rc = put(w, ",\n", 2);
    if (rc == ST_OK && j->record_sep)
        rc = put(w, "\x1E", 1);
    if (rc == ST_OK)
        rc = put(w, (const char *)buf, len);
    if (rc == ST_OK && j->lines)
        rc = put(w, "\n", 1);
    if (rc == ST_OK)
        j->written++;
    return rc;
}

/* ---- the format table ------------------------------------------------------ */

static void gj_free(gj_writer *j)
{
    if (!j)
        return;
    if (j->fp)
        fclose(j->fp);
    if (j->gen)
        yajl_gen_free(j->gen);
    if (j->scratch)
        yajl_gen_free(j->scratch);
    st_fields_free(&j->fields);
    st_geom_clear(&j->oriented);
    st_free(j);
}

static st_status open_common(st_writer *w, int lines)
{
    gj_writer *j = st_calloc(1, sizeof *j);
    if (!j)
        return ST_ERR_NOMEM;
    w->impl = j;
    j->lines = lines;
    j->record_sep = lines && st_str_ends_with_ci(w->path, ".geojsons");
    st_fields_init(&j->fields);
    st_geom_init(&j->oriented);
    j->gen = yajl_gen_alloc(NULL);
    j->scratch = yajl_gen_alloc(NULL);
    if (!j->gen || !j->scratch)
        return ST_ERR_NOMEM;
    j->fp = fopen(w->tmp_path, "wb");
    if (!j->fp)
        return st_writer_fail(w, ST_ERR_IO, "cannot create %s: %s", w->tmp_path,
                              strerror(errno));
    return ST_OK;
}

static st_status gj_begin_layer(st_writer *w, const char *name,
                                const st_fields *fields, st_geom_type type)
{
    (void)name;   /* RFC 7946 has no layer name; the file name is it */
    (void)type;   /* each feature names its own geometry type */
    gj_writer *j = w->impl;
    st_status rc = st_fields_copy(&j->fields, fields);
    return rc == ST_OK ? put_header(w) : rc;
}

static st_status gj_end_layer(st_writer *w)
{
    return put_footer(w);
}

static st_status gj_finish(st_writer *w)
{
    gj_writer *j = w->impl;
    st_status rc = put_footer(w);
    if (rc == ST_OK && (fflush(j->fp) != 0 || ferror(j->fp)))
        rc = st_writer_fail(w, ST_ERR_IO, "cannot write: %s", strerror(errno));
    FILE *fp = j->fp;
    j->fp = NULL;
    if (fclose(fp) != 0 && rc == ST_OK)
        rc = st_writer_fail(w, ST_ERR_IO, "cannot close: %s", strerror(errno));
    gj_free(j);
    w->impl = NULL;
    return rc;
}

static void gj_discard(st_writer *w)
{
    gj_free(w->impl);
    w->impl = NULL;
    remove(w->tmp_path);
}

static st_status geojson_open(st_writer *w) { return open_common(w, 0); }
static st_status geojsonl_open(st_writer *w) { return open_common(w, 1); }

static const char *const geojson_ext[] = {".geojson", ".json", NULL};
static const char *const geojsonl_ext[] = {".geojsonl", ".geojsons", ".ndjson", NULL};

const st_writer_format st_geojson_writer_format = {
    "geojson", geojson_ext, 0, geojson_open, gj_begin_layer, gj_write,
    gj_end_layer, NULL, gj_finish, NULL, gj_discard};
const st_writer_format st_geojsonl_writer_format = {
    "geojsonl", geojsonl_ext, 0, geojsonl_open, gj_begin_layer, gj_write,
    gj_end_layer, NULL, gj_finish, NULL, gj_discard};
