/*
** io/ioInt.h -- private interface between the generic reader/writer code
** (io/reader.c, io/writer.c) and one file per format.
**
** A format is a table of functions. Adding a format means one new .c file
** with a table, and one line in the list in reader.c or writer.c.
*/
#ifndef STOCKTAKE_IO_INT_H
#define STOCKTAKE_IO_INT_H

#include "stocktake/io.h"

typedef struct st_reader_format {
    const char *name;
    /* 1 if this format reads 'path' (decided by extension or content). */
    int (*probe)(const char *path);
    /* Open r->path (and r->layer_request); fill r->fields, r->crs_def,
    ** r->count_hint, r->schema_fixed, r->layer_name; set r->impl. */
    st_status (*open)(st_reader *r);
    /* Produce the next feature in the source CRS, or *out = NULL at end.
    ** The generic code reprojects and numbers it. */
    st_status (*next)(st_reader *r, st_feature **out);
    /* Free r->impl (called once, also after a failed open). */
    void (*close)(st_reader *r);
} st_reader_format;

struct st_reader {
    const st_reader_format *fmt;
    char *path;              /* file path, owned */
    char *layer_request;     /* "layer" part of "file.gpkg:layer", owned or NULL */
    char *layer_name;        /* owned, set by open */
    st_read_options opt;
    st_diags *diags;         /* borrowed */
    st_fields fields;
    int schema_fixed;
    char *crs_def;           /* owned; as found in the file, NULL if none */
    st_crs_transform *xform; /* NULL: already lon/lat WGS 84 */
    char *crs_name;          /* owned */
    long long count_hint;
    long long bytes_done, bytes_total;
    uint64_t next_index;
    void *impl;
};

typedef struct st_writer_format {
    const char *name;
    const char *const *extensions;   /* NULL-terminated, lowercase, with dot */
    int multi_layer;
    st_status (*open)(st_writer *w);                 /* create w->tmp_path */
    st_status (*begin_layer)(st_writer *w, const char *name,
                             const st_fields *fields, st_geom_type type);
    st_status (*write)(st_writer *w, const st_feature *f);
    st_status (*end_layer)(st_writer *w);
    /* st_writer_write_rows for the format (w->in_layer checked); NULL: the
    ** generic code fills each row and calls write(). */
    st_status (*write_rows)(st_writer *w, size_t n, st_row_fill fill, void *ctx,
                            unsigned nthreads);
    /* Flush and close the temporary file(s); release w->impl and set it
    ** to NULL, also on failure. */
    st_status (*finish)(st_writer *w);
    /* Rename temporary file(s) into place; NULL: rename tmp_path to path. */
    st_status (*commit)(st_writer *w);
    /* Close and delete temporary file(s) after a failure; free w->impl.
    ** Also called after a successful finish() whose commit failed: then
    ** w->impl is NULL and only leftover temporary files are removed. */
    void (*discard)(st_writer *w);
} st_writer_format;

struct st_writer {
    const st_writer_format *fmt;
    char *path;              /* final path, owned */
    char *tmp_path;          /* temporary path in the same folder, owned */
    st_diags *diags;         /* borrowed */
    st_buf notes;            /* what the format changed, one line each */
    int layers_begun;
    int in_layer;
    uint32_t nfields;        /* fields of the layer begun last */
    int finished;            /* finish() returned OK: impl released */
    int committed;
    void *impl;
};

extern const st_reader_format st_shp_reader_format;
extern const st_reader_format st_geojson_reader_format;
extern const st_reader_format st_geojsonl_reader_format;
extern const st_reader_format st_gpkg_reader_format;

extern const st_writer_format st_gpkg_writer_format;
extern const st_writer_format st_geojson_writer_format;
extern const st_writer_format st_geojsonl_writer_format;
extern const st_writer_format st_csv_writer_format;
extern const st_writer_format st_shp_writer_format;

/* Shared helpers for formats. */
/* Diagnostic about the reader's file at feature 'index' (-1: none). */
st_status st_reader_fail(st_reader *r, st_status code, long long index,
                         const char *fmt, ...) ST_PRINTF(4, 5);
st_status st_writer_fail(st_writer *w, st_status code, const char *fmt, ...)
    ST_PRINTF(3, 4);
/* A row for st_row_fill callbacks: 'nvalues' NULL values (owned by the
** row), empty text and point. ST_ERR_NOMEM. */
st_status st_writer_row_init(st_row *row, uint32_t nvalues) ST_MUST_CHECK;
/* Clear the row as st_row_fill promises it, then fill(ctx, k, row). */
st_status st_writer_row_fill(st_row *row, st_row_fill fill, void *ctx,
                             size_t k) ST_MUST_CHECK;
void st_writer_row_free(st_row *row);

/* Lowercase extension of path including the dot ("" if none); borrowed
** pointer into path. */
const char *st_path_ext(const char *path);
/* Returns owned file stem ("dir/a.b.shp" -> "a.b"). */
char *st_path_stem(const char *path);

/* 1 when r is a GeoPackage reader reading through its window (gpkg_read.c). */
int st_gpkg_reader_windowed(const st_reader *r);

/* ---- GeoPackage binary geometry (io/gpkg_blob.c) ------------------------ */

/* Largest geometry blob read or written (ST_ERR_LIMIT beyond). */
#define ST_GPKG_MAX_BLOB ((size_t)256 << 20)

struct st_geos;   /* stocktake/geomx.h */
struct sqlite3;   /* sqlite3.h */

/* The header of a GeoPackage geometry blob (OGC 12-128r, clause 2.1.3). */
typedef struct st_gpkg_header {
    int little_endian;      /* flag bit B: byte order of srs_id and envelope */
    int envelope_code;      /* flag bits E: 0 none, 1 xy, 2 xyz, 3 xym, 4 xyzm */
    int empty;              /* flag bit Y */
    int32_t srs_id;
    double envelope[8];     /* as stored: minx, maxx, miny, maxy[, min, max]... */
    size_t size;            /* header bytes: the WKB starts here */
} st_gpkg_header;

/*
** Parse the header of the blob b[0..n) (borrowed) into *h. Checks magic,
** version, the extended bit (unsupported), the envelope code and that the
** header fits in n. On failure returns ST_ERR_FORMAT and writes the reason
** into err.
*/
st_status st_gpkg_blob_header(const unsigned char *b, size_t n,
                              st_gpkg_header *h, char *err,
                              size_t errlen) ST_MUST_CHECK;

/*
** Decode a whole GeoPackage geometry blob (borrowed) into 'out' (cleared
** first): header, then the WKB through GEOS (gx, the caller's context).
** Every count in the WKB is checked against the bytes left before GEOS sees
** it. Curved and other types GEOS cannot hold give type ST_GEOM_OTHER.
** Returns ST_ERR_FORMAT (reason in err), ST_ERR_LIMIT or ST_ERR_NOMEM;
** 'out' is then NULL-typed. Safe on any input: meant for a fuzz target.
*/
st_status st_gpkg_blob_decode(struct st_geos *gx, const unsigned char *b,
                              size_t n, st_geom *out, char *err,
                              size_t errlen) ST_MUST_CHECK;

/*
** Encode g (borrowed; not ST_GEOM_NULL or ST_GEOM_OTHER) as a GeoPackage
** blob into 'out' (cleared first): little-endian header with srs_id, an
** [minx, maxx, miny, maxy] envelope of the finite coordinates (none when
** the geometry is empty: then the empty flag is set), then 2-D
** little-endian WKB. A collection is written as a multipolygon, like
** st_geom_to_geos(). env receives the envelope as (minx, miny, maxx, maxy)
** and *has_env whether there is one. ST_ERR_LIMIT beyond ST_GPKG_MAX_BLOB.
*/
st_status st_gpkg_blob_encode(const st_geom *g, int32_t srs_id, st_buf *out,
                              double env[4], int *has_env) ST_MUST_CHECK;

/* ---- GeoPackage R-tree bulk load (io/gpkg_rtree.c) --------------------- */

/* One feature's box in the R-tree: its fid and float bounds rounded
** outward (st_gpkg_rtree_down for minima, _up for maxima), as SQLite's
** rtree module stores them. */
typedef struct st_gpkg_box {
    int64_t id;
    float b[4];             /* minx, maxx, miny, maxy */
} st_gpkg_box;

/* The largest float <= d, and the smallest float >= d. */
float st_gpkg_rtree_down(double d);
float st_gpkg_rtree_up(double d);

/*
** Fill the empty rtree virtual table 'name' (just created on 'db') with
** boxes[0..n) (borrowed), packed sort-tile-recursive and written straight
** into its _node, _rowid and _parent tables. ST_ERR_NOMEM, or ST_ERR_IO
** with SQLite's message in err.
*/
st_status st_gpkg_rtree_load(struct sqlite3 *db, const char *name, st_gpkg_box *boxes,
                             size_t n, char *err, size_t errlen) ST_MUST_CHECK;

/* Append name as an SQL identifier in double quotes ("" inside). */
st_status st_gpkg_quote_ident(st_buf *b, const char *name) ST_MUST_CHECK;

/* "dir/name.ext" -> "dir/.name.tmp-PID.ext": where a writer puts what it
** writes until the commit renames it (hidden, same folder so the rename is
** atomic, same extension so format libraries that look at it behave).
** Returns owned, NULL on no memory. */
char *st_io_temp_name(const char *path);

/* The GeoPackage core every GeoPackage written here starts with
** (io/gpkg_core.c): the core tables with the two undefined SRS rows, and
** EPSG's WKT of WGS 84 for the EPSG:4326 row. */
extern const char st_gpkg_core_sql[];
extern const char st_gpkg_wgs84_wkt[];

/* The first n (up to 100) bytes h of a file of 'size' bytes, as SQLite
** writes its header: not an SQLite file, shorter than the 100-byte header,
** shorter than the pages the header states (*stated: their bytes), or fine
** (io/gpkg_core.c says why SQLite itself would not notice). */
enum { ST_SQLITE_OK = 0, ST_SQLITE_NOT_SQLITE, ST_SQLITE_SHORT_HEADER, ST_SQLITE_TRUNCATED };
int st_sqlite_header_check(const unsigned char *h, size_t n, long long size, long long *stated);

#endif
