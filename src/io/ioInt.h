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
/* Lowercase extension of path including the dot ("" if none); borrowed
** pointer into path. */
const char *st_path_ext(const char *path);
/* Returns owned file stem ("dir/a.b.shp" -> "a.b"). */
char *st_path_stem(const char *path);

#endif
