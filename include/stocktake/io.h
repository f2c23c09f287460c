/*
** stocktake/io.h -- reading and writing footprint layers.
**
** Readers stream features one at a time, already in lon/lat WGS 84 (PROJ),
** so memory does not grow with the file. Writers write to a temporary name
** beside the target and rename it only in st_writer_commit(); a writer
** closed without a commit removes its temporary file. Inputs are opened
** read-only and never modified.
**
** Formats (chosen by extension, then by content):
**   .shp (+ .shx .dbf .prj .cpg)   Shapelib
**   .geojson .json                 RFC 7946 FeatureCollection (YAJL, streaming)
**   .geojsonl .geojsons .ndjson    one Feature per line
**   .gpkg[:layer]                  OGC GeoPackage (SQLite)
**   .csv                           writer only: attributes + WKT column
*/
#ifndef STOCKTAKE_IO_H
#define STOCKTAKE_IO_H

#include "stocktake/core.h"
#include "stocktake/feature.h"

/* ---- reading ------------------------------------------------------------ */

typedef struct st_reader st_reader;

typedef struct st_read_options {
    const char *crs_override;  /* "EPSG:NNNN" for a layer without a CRS (or
                                  to overrule it), or NULL */
    int strict_coords;         /* 1: a NaN/infinite or out-of-range coordinate
                                  is an ST_ERR_FORMAT error; 0: the feature is
                                  returned and a later stage flags it */
    int keep_source_crs;       /* 1: do not reproject (inspect) */
    const struct st_read_window *window;   /* NULL: every feature */
} st_read_options;

#define ST_READ_OPTIONS_DEFAULT ((st_read_options){NULL, 0, 0, NULL})

/*
** A window to read a GeoPackage layer through its R-tree (a part of a job
** split by windows, facts.h): only the rows whose R-tree box meets one of
** the lon/lat boxes, and the rows at the positions 'always', in fid
** order. The caller vouches, from the layer's facts, that the fids are
** dense (fid = fid_min + position) and that the layer has 'count' rows,
** of which all but the 'always' ones have coordinates. The reader reads
** the window only when the layer has an R-tree holding count - nalways
** rows, its CRS is lon/lat WGS 84 (or a box can be carried into it) and
** the list is not too long; else it reads every row (st_reader_windowed
** says which). A feature read through a window has its position in the
** layer as its index.
*/
typedef struct st_read_window {
    double box[2][4];          /* west, south, east, north */
    int nbox;                  /* 1 or 2 */
    int64_t fid_min;
    uint64_t count;
    const uint64_t *always;    /* positions, rising; borrowed */
    size_t nalways;
} st_read_window;

/* The most 'always' positions a windowed read takes (a longer list: the
** whole layer is read). */
#define ST_READ_WINDOW_MAX_ALWAYS 100000

/*
** Open the layer at 'spec' ("path" or "path.gpkg:layer"); 'spec' and 'opt'
** are borrowed. On success *out is an open reader; release it with
** st_reader_close() (accepts NULL). On failure *out is NULL, one diagnostic
** naming the file is added to 'diags', and the status says why.
*/
st_status st_reader_open(const char *spec, const st_read_options *opt,
                         st_diags *diags, st_reader **out) ST_MUST_CHECK;

/*
** Next feature: *out is an owned feature (free with st_feature_free) or NULL
** at the end of the layer. On error *out is NULL and a diagnostic with the
** file and the feature index or byte offset is added.
*/
st_status st_reader_next(st_reader *r, st_feature **out) ST_MUST_CHECK;

/* Fields known so far. Formats with a fixed schema (shp, gpkg) know them all
** after open; GeoJSON adds fields as they appear (see st_reader_schema_fixed). */
const st_fields *st_reader_fields(const st_reader *r);
int st_reader_schema_fixed(const st_reader *r);
/* Format name ("shapefile", "geojson", "geojsonl", "gpkg"). */
const char *st_reader_format_name(const st_reader *r);
/* The layer's own name (file stem, or the GeoPackage table). */
const char *st_reader_layer_name(const st_reader *r);
/* Human-readable source CRS ("EPSG:32643", "OGC:CRS84", ...), or NULL. */
const char *st_reader_crs(const st_reader *r);
/* The source CRS definition in force (the --crs override, else as found in
** the file: WKT, "EPSG:n", ...), borrowed, or NULL. 'inspect' uses it to
** give a lon/lat extent for a layer it reads in its own CRS. */
const char *st_reader_crs_def(const st_reader *r);
/* Number of features if the format knows it before reading, else -1. */
long long st_reader_count_hint(const st_reader *r);
/* Bytes consumed so far and total, for a progress display (0 if unknown). */
void st_reader_progress(const st_reader *r, long long *done, long long *total);
/* 1 when the reader reads through opt->window, 0 when it reads every row. */
int st_reader_windowed(const st_reader *r);
/* The file the reader opened (borrowed). */
const char *st_reader_path(const st_reader *r);
void st_reader_close(st_reader *r);

/* ---- writing ------------------------------------------------------------ */

typedef struct st_writer st_writer;

/*
** Open a writer for 'path', format by its extension. Nothing appears at
** 'path' before st_writer_commit(). *out NULL on failure (diagnostic added).
*/
st_status st_writer_open(const char *path, st_diags *diags,
                         st_writer **out) ST_MUST_CHECK;

/*
** Begin a layer named 'name' with the given fields (borrowed, copied).
** Single-layer formats accept one layer; GeoPackage any number.
** 'geom_type' is the declared geometry type (ST_GEOM_NULL: no geometry
** column, an attribute table).
*/
st_status st_writer_begin_layer(st_writer *w, const char *name,
                                const st_fields *fields,
                                st_geom_type geom_type) ST_MUST_CHECK;
/* Write one feature (borrowed); values[i] goes to field i of the layer. */
st_status st_writer_write(st_writer *w, const st_feature *f) ST_MUST_CHECK;
st_status st_writer_end_layer(st_writer *w) ST_MUST_CHECK;

/*
** A row of a layer being written, as a row source fills it for
** st_writer_write_rows. Before each fill: 'f' is zeroed except f.values,
** an array of the layer's field count of NULLs (f.nvalues set), and 'text'
** is empty. The fill sets f.geom (a borrowed view), f.values[i] (borrowed
** strings, or strings it puts into 'text': they only need to last until
** the fill returns, the row is taken in at once) and f.bid. 'point' is a
** geometry the fill may build a point into (st_geom_reset first): it keeps
** its memory from row to row.
*/
typedef struct st_row {
    st_feature f;
    st_buf text;
    st_geom point;
} st_row;

/* Fill row k (0-based) of the rows written by st_writer_write_rows. With
** more than one thread it runs on several threads at once for different
** rows: it may only read what the rows share and write through 'row'. */
typedef st_status (*st_row_fill)(void *ctx, size_t k, st_row *row);

/*
** Write rows 0 .. n-1 of the current layer, in that order, as
** st_writer_write would write each one. With nthreads > 1, a GeoPackage
** fills and encodes the rows (geometry blobs, numbers from text) on
** nthreads helper threads while this thread inserts them; the file is the
** same byte for byte for any nthreads. Other formats fill and write in
** this thread. The first failing row stops the writing, with the same
** status and diagnostic whatever nthreads.
*/
st_status st_writer_write_rows(st_writer *w, size_t n, st_row_fill fill, void *ctx,
                               unsigned nthreads) ST_MUST_CHECK;

/* Finish and rename into place. After a failed commit nothing is at 'path'. */
st_status st_writer_commit(st_writer *w) ST_MUST_CHECK;
/* Report of what the format changed, e.g. Shapefile field names shortened:
** one "long -> short" line each, or NULL (borrowed). */
const char *st_writer_notes(const st_writer *w);
/* Close; without a commit the temporary output is removed. Accepts NULL. */
void st_writer_close(st_writer *w);

/* 1 if 'path' has an extension a writer knows. */
int st_writer_supports(const char *path);

/* Returns owned SQLite "file:" URI of path (percent-encoded, so that no
** file name is mistaken for a URI) with '?query' appended; NULL on no
** memory. */
char *st_gpkg_uri(const char *path, const char *query);

/* Open the SQLite file at 'uri' (st_gpkg_uri) read-only and hardened for
** files from anywhere: defensive mode, an untrusted schema (its triggers
** and views call no function with side effects), no extension loading,
** values of at most 'max_length' bytes. Returns SQLite's result code;
** *db is set as sqlite3_open_v2 sets it (close it even on failure). */
struct sqlite3;
int st_gpkg_open_readonly(const char *uri, int max_length, struct sqlite3 **db);

/* ---- coordinate reference systems (PROJ) ------------------------------ */

typedef struct st_crs_transform st_crs_transform;

/*
** Prepare the transformation from 'source' (WKT, "EPSG:n", PROJ string) to
** lon/lat WGS 84 with longitude first. *out is NULL when the source already
** is lon/lat WGS 84 (nothing to do). 'file' names the layer in diagnostics.
*/
st_status st_crs_to_wgs84(const char *source, const char *file,
                          st_diags *diags, st_crs_transform **out) ST_MUST_CHECK;
/* Transform n x,y pairs in place. Points PROJ cannot transform become
** infinite; the count of such points is returned in *failed. */
st_status st_crs_apply(st_crs_transform *t, double *xy, size_t n,
                       size_t *failed) ST_MUST_CHECK;
/* The lon/lat box in[4] (west, south, east, north) carried into t's
** source CRS (axis order as stored: x first): the bounds of its densified
** edges, grown by 5% a side so that the bowed edges between the points
** stay inside. ST_ERR_PROJ (no diagnostic) when PROJ cannot. */
st_status st_crs_box_to_source(st_crs_transform *t, const double in[4],
                               double out[4]) ST_MUST_CHECK;
/* Short name of the source CRS ("EPSG:32643" when it has an EPSG id). */
const char *st_crs_name(const st_crs_transform *t);
void st_crs_free(st_crs_transform *t);
/* 1 if 'def' denotes lon/lat (or lat/lon) WGS 84 / CRS84. */
int st_crs_is_wgs84(const char *def);
/* Returns owned short name ("EPSG:4326") of a CRS definition: its own
** identifier, else an EPSG code PROJ identifies with confidence >= 70, else
** the CRS's name. NULL when PROJ cannot read 'def' (or on no memory). */
char *st_crs_identify(const char *def);

#endif
