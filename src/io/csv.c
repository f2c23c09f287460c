/*
** io/csv.c -- the CSV writer: one layer as an attribute table with the
** geometry as WKT in a last column.
**
** Input:   features whose values[i] belong to field i of the layer, and
**          their lon/lat geometry.
** Output:  RFC 4180 text in UTF-8 without a byte-order mark, records ended
**          by CRLF. The first record holds the field names, then "wkt"
**          (left out when the layer is declared without geometry,
**          ST_GEOM_NULL). A source field already called "wkt" (in any
**          letter case) is written as "src_wkt" (or "src_wkt_2", ...), and
**          the rename is reported in the writer's notes. A field is quoted
**          (by libcsv's csv_fwrite, doubling inner quotes) only when it
**          holds a comma, a quote, CR or LF, or starts or ends with a space
**          or tab; missing and empty values are both written as nothing.
**          Invalid UTF-8 in a value is replaced by U+FFFD. The WKT is GEOS's
**          (st_geom_to_wkt): 2-D, up to 17 significant digits, so
**          coordinates survive a round trip; a null geometry is empty. A
**          geometry GEOS refuses to build (a two-point ring, an unclosed
**          ring, a NaN: a set-aside footprint keeps what was read) is
**          written from its coordinates as they are, same digits.
** Errors:  every write is checked; a failed write, flush or close is
**          ST_ERR_IO naming the file; a geometry GEOS cannot build is
**          ST_ERR_GEOS naming the feature. The temporary file is removed by
**          discard() and the target is never touched before commit.
** Limits:  one layer per file (the format has no layers).
*/
#include <errno.h>
#include <math.h>
#include <stdio.h>
#include <string.h>
#include <strings.h>

#include <csv.h>

#include "ioInt.h"
#include "stocktake/geomx.h"

#define CSV_GEOM_COLUMN "wkt"

typedef struct csv_out {
    FILE *fp;
    st_geos *gx;          /* for WKT; one per writer, so one per thread */
    uint32_t nfields;
    int has_geom;
    st_buf wkt;           /* reused for each feature */
    int failed;           /* a write failed: later writes are refused */
} csv_out;

static const char *const csv_ext[] = {".csv", NULL};

static st_status io_fail(st_writer *w, const char *what)
{
    csv_out *c = w->impl;
    if (c)
        c->failed = 1;
    return st_writer_fail(w, ST_ERR_IO, "cannot %s the CSV file: %s", what,
                          errno ? strerror(errno) : "write error");
}

static st_status csvw_open(st_writer *w)
{
    csv_out *c = st_calloc(1, sizeof *c);
    if (!c)
        return ST_ERR_NOMEM;
    st_buf_init(&c->wkt, 0);
    w->impl = c;
    c->gx = st_geos_new();
    if (!c->gx)
        return ST_ERR_NOMEM;
    errno = 0;
    c->fp = fopen(w->tmp_path, "wb");
    if (!c->fp)
        return st_writer_fail(w, ST_ERR_IO, "cannot create a temporary file beside it (%s): %s",
                              w->tmp_path, strerror(errno));
    return ST_OK;
}

/* 1 if s must be quoted to read back as the same text (RFC 4180 plus
** surrounding blanks, which some readers trim). */
static int needs_quotes(const char *s, size_t n)
{
    if (n && (s[0] == ' ' || s[0] == '\t' || s[n - 1] == ' ' || s[n - 1] == '\t'))
        return 1;
    return strcspn(s, ",\"\r\n") < n;
}

/* Write one field's text (after the separator). */
static st_status put_text(st_writer *w, const char *s)
{
    csv_out *c = w->impl;
    size_t n = strlen(s);
    char *clean = NULL;
    if (st_utf8_valid_prefix(s, n) != n) {
        if (!(clean = st_utf8_sanitize(s, n)))
            return ST_ERR_NOMEM;
        s = clean;
        n = strlen(s);
    }
    errno = 0;
    int ok = needs_quotes(s, n) ? csv_fwrite(c->fp, s, n) == 0
                                : fwrite(s, 1, n, c->fp) == n;
    st_free(clean);
    return ok ? ST_OK : io_fail(w, "write");
}

static st_status put_raw(st_writer *w, const char *s)
{
    csv_out *c = w->impl;
    size_t n = strlen(s);
    errno = 0;
    return fwrite(s, 1, n, c->fp) == n ? ST_OK : io_fail(w, "write");
}

/* Name for the source field 'name' that does not clash with the geometry
** column or another field: returns owned string. */
static char *header_name(st_writer *w, const st_fields *fields, const char *name,
                         st_status *rc)
{
    *rc = ST_OK;
    if (strcasecmp(name, CSV_GEOM_COLUMN) != 0) {
        char *same = st_strdup(name);
        if (!same)
            *rc = ST_ERR_NOMEM;
        return same;
    }
    for (int k = 1; k < 1000; k++) {
        char *alt = k == 1 ? st_strdup("src_" CSV_GEOM_COLUMN)
                           : st_strdup_printf("src_" CSV_GEOM_COLUMN "_%d", k);
        if (!alt || st_fields_find(fields, alt) < 0) {
            if (alt && st_buf_printf(&w->notes, "%s -> %s\n", name, alt) != ST_OK) {
                st_free(alt);
                alt = NULL;
            }
            if (!alt)
                *rc = ST_ERR_NOMEM;
            return alt;
        }
        st_free(alt);
    }
    *rc = st_writer_fail(w, ST_ERR_LIMIT, "no free name for the field '%s'", name);
    return NULL;
}

static st_status csvw_begin(st_writer *w, const char *name, const st_fields *fields,
                           st_geom_type type)
{
    (void)name;   /* a CSV file has no layer name */
    csv_out *c = w->impl;
    c->nfields = fields->count;
    c->has_geom = type != ST_GEOM_NULL;
    st_status rc = ST_OK;
    for (uint32_t i = 0; rc == ST_OK && i < fields->count; i++) {
        char *col = header_name(w, fields, fields->items[i].name, &rc);
        if (!col)
            break;
        rc = i ? put_raw(w, ",") : ST_OK;
        if (rc == ST_OK)
            rc = put_text(w, col);
        st_free(col);
    }
    if (rc == ST_OK && c->has_geom)
        rc = put_raw(w, fields->count ? "," CSV_GEOM_COLUMN : CSV_GEOM_COLUMN);
    return rc == ST_OK ? put_raw(w, "\r\n") : rc;
}

/* One coordinate as WKT: %.17g, and NaN/Inf spelled as GEOS writes them. */
static st_status put_coord(st_buf *b, double v)
{
    if (isnan(v))
        return st_buf_puts(b, "NaN");
    if (isinf(v))
        return st_buf_puts(b, v > 0 ? "Inf" : "-Inf");
    return st_buf_printf(b, "%.17g", v);
}

/* Rings [first, end) of g as "(x y, ...), (...)". */
static st_status put_rings(st_buf *b, const st_geom *g, uint32_t first, uint32_t end,
                           int bare)
{
    st_status rc = ST_OK;
    for (uint32_t r = first; rc == ST_OK && r < end; r++) {
        rc = st_buf_puts(b, r > first ? ", " : "");
        if (rc == ST_OK && !bare)
            rc = st_buf_puts(b, "(");
        for (uint32_t i = g->ring_coord[r]; rc == ST_OK && i < g->ring_coord[r + 1]; i++) {
            rc = st_buf_puts(b, i > g->ring_coord[r] ? ", " : "");
            if (rc == ST_OK)
                rc = put_coord(b, g->xy[2 * i]);
            if (rc == ST_OK)
                rc = st_buf_puts(b, " ");
            if (rc == ST_OK)
                rc = put_coord(b, g->xy[2 * i + 1]);
        }
        if (rc == ST_OK && !bare)
            rc = st_buf_puts(b, ")");
    }
    return rc;
}

/*
** WKT written straight from the coordinate arrays, for the geometries GEOS
** refuses to build (a ring of two points, a ring not closed, a NaN): a set
** aside footprint keeps the geometry as read, so CSV must still hold it.
** A collection is written as a multipolygon, as st_geom_to_geos() does.
*/
static st_status plain_wkt(const st_geom *g, st_buf *b)
{
    static const char *const names[] = {
        "", "POINT", "LINESTRING", "POLYGON", "MULTIPOINT", "MULTILINESTRING",
        "MULTIPOLYGON", "MULTIPOLYGON"};
    st_geom_type t = g->type;
    st_status rc = st_buf_puts(b, names[t]);
    if (rc != ST_OK || g->nparts == 0 || g->ncoords == 0)
        return rc == ST_OK ? st_buf_puts(b, " EMPTY") : rc;
    int multi = t >= ST_GEOM_MULTIPOINT;
    rc = st_buf_puts(b, " (");
    for (uint32_t p = 0; rc == ST_OK && p < g->nparts; p++) {
        uint32_t first = g->part_ring[p], end = g->part_ring[p + 1];
        int wrap = multi && t != ST_GEOM_MULTIPOINT;
        if (p)
            rc = st_buf_puts(b, ", ");
        if (rc == ST_OK && wrap && t != ST_GEOM_MULTILINESTRING)
            rc = st_buf_puts(b, "(");
        if (rc == ST_OK)
            rc = put_rings(b, g, first, end,
                           t == ST_GEOM_POINT || t == ST_GEOM_LINESTRING ||
                               t == ST_GEOM_MULTIPOINT);
        if (rc == ST_OK && wrap && t != ST_GEOM_MULTILINESTRING)
            rc = st_buf_puts(b, ")");
    }
    return rc == ST_OK ? st_buf_puts(b, ")") : rc;
}

/* The feature's geometry as WKT in c->wkt ("" when null): GEOS's, or for
** a geometry GEOS cannot build, plain_wkt(). */
static st_status geometry_text(st_writer *w, const st_feature *f)
{
    csv_out *c = w->impl;
    st_buf_clear(&c->wkt);
    if (f->geom.type == ST_GEOM_NULL || f->geom.type == ST_GEOM_OTHER)
        return ST_OK;
    st_geos_clear_error(c->gx);
    st_status rc = st_geom_to_wkt(c->gx, &f->geom, &c->wkt);
    if (rc == ST_ERR_GEOS) {
        st_buf_clear(&c->wkt);
        rc = plain_wkt(&f->geom, &c->wkt);
    }
    return rc;
}

static st_status csvw_write(st_writer *w, const st_feature *f)
{
    csv_out *c = w->impl;
    if (c->failed)
        return ST_ERR_IO;
    st_status rc = c->has_geom ? geometry_text(w, f) : ST_OK;
    if (rc == ST_ERR_GEOS) {
        char why[256] = "";
        GEOSGeometry *g = st_geom_to_geos(c->gx, &f->geom, why, sizeof why);
        if (g)
            GEOSGeom_destroy_r(c->gx->h, g);
        st_loc loc = ST_LOC_FEATURE(w->path, (long long)f->index);
        return st_diags_add(w->diags, ST_SEV_ERROR, ST_ERR_GEOS, &loc,
                            "geometry cannot be written as WKT: %s",
                            why[0] ? why : c->gx->last_error[0] ? c->gx->last_error
                                                                : "GEOS refused it");
    }
    for (uint32_t i = 0; rc == ST_OK && i < c->nfields; i++) {
        const char *v = st_feature_value(f, i);
        if (i)
            rc = put_raw(w, ",");
        if (rc == ST_OK && v && *v)
            rc = put_text(w, v);
    }
    if (rc == ST_OK && c->has_geom) {
        if (c->nfields)
            rc = put_raw(w, ",");
        if (rc == ST_OK && c->wkt.len)
            rc = put_text(w, c->wkt.data);
    }
    return rc == ST_OK ? put_raw(w, "\r\n") : rc;
}

static st_status csvw_end(st_writer *w)
{
    (void)w;
    return ST_OK;
}

static void release(csv_out *c)
{
    st_geos_free(c->gx);
    st_buf_free(&c->wkt);
    st_free(c);
}

static st_status csvw_finish(st_writer *w)
{
    csv_out *c = w->impl;
    st_status rc = c->failed ? ST_ERR_IO : ST_OK;
    errno = 0;
    if (rc == ST_OK && (fflush(c->fp) != 0 || ferror(c->fp)))
        rc = io_fail(w, "flush");
    errno = 0;
    if (fclose(c->fp) != 0 && rc == ST_OK)
        rc = io_fail(w, "close");
    c->fp = NULL;
    release(c);
    w->impl = NULL;
    return rc;
}

static void csvw_discard(st_writer *w)
{
    csv_out *c = w->impl;
    if (c) {
        if (c->fp)
            fclose(c->fp);
        release(c);
        w->impl = NULL;
    }
    remove(w->tmp_path);
}

const st_writer_format st_csv_writer_format = {
    "csv", csv_ext, 0, csvw_open, csvw_begin, csvw_write, csvw_end, NULL, csvw_finish, NULL,
    csvw_discard};
