/*
** stocktake/facts.h -- the layer facts of a job split by windows
** (docs/scale.md): what a part needs to know about a whole input layer
** but cannot learn from the features within reach of its window alone.
**
** `stocktake tiles --facts FILE` reads every input whole once (it must, to
** list the tiles) and writes these facts; `stocktake run --tile ...
** --facts FILE` takes them instead of reading every feature, so that a
** GeoPackage input is read through its R-tree for the window only.
**
** Per input layer, in input order: the input as given, the file it names
** with its size and modification time (so a changed input is refused
** before it is read), format, layer name, the CRS it is read from (the
** file's or --crs), the feature count (bids: a
** layer's features follow those of the layers before it), per field
** whether a value that is not a number was met in a numeric field (the
** field is then read as text), the robust extent of the features'
** centres (the swapped-axes check, footprint.h), whether a GeoPackage's
** fids are dense in read order (fid = fid_min + position, so a row's
** position comes from its fid), and the positions of the features without
** coordinates (every part holds those; an R-tree does not list them).
**
** The file is text, one "key value" a line, ending with the SHA-256 of
** everything before it (format: src/facts/facts.c). The reader is strict:
** any damage, a missing or extra line, a value out of range or a wrong
** digest is ST_ERR_FORMAT naming the file and the line.
*/
#ifndef STOCKTAKE_FACTS_H
#define STOCKTAKE_FACTS_H

#include <stddef.h>
#include <stdint.h>

#include "stocktake/core.h"
#include "stocktake/feature.h"
#include "stocktake/footprint.h"

typedef struct st_facts_layer {
    char *spec;                  /* the input as given ("a.gpkg:layer") */
    char *file;                  /* the file it names */
    long long size;              /* bytes */
    long long mtime_s, mtime_ns; /* modification time */
    char *format;                /* st_reader_format_name */
    char *name;                  /* st_reader_layer_name */
    char *crs;                   /* st_reader_crs: the CRS read from ("" none) */
    uint64_t count;              /* features */
    uint32_t nfields;
    uint8_t *text;               /* per field: 1 when a numeric field holds
                                    a value that is not a number */
    st_footprint_extent extent;
    int dense;                   /* GeoPackage: fid = fid_min + position */
    int64_t fid_min;
    uint64_t *coordless;         /* positions (0-based, rising) of the
                                    features without coordinates */
    size_t ncoordless, capcoordless;
} st_facts_layer;

typedef struct st_facts {
    st_facts_layer *layers;
    size_t n;
    char sha256[65];             /* of the file as read or written */
} st_facts;

/* Free the facts' contents (not 'f' itself); NULL is a no-op. */
void st_facts_free(st_facts *f);
void st_facts_layer_free(st_facts_layer *l);

/* ---- gathering a layer's facts while it is read ------------------------ */

/* The centres seen so far (for the extent), freed by st_facts_scan_free. */
typedef struct st_facts_scan {
    double *centres;
    size_t n, cap;
} st_facts_scan;

/* Start a layer: 'l' zeroed, 'sc' empty. */
void st_facts_scan_begin(st_facts_scan *sc, st_facts_layer *l);
/* Note feature f (borrowed; f->index its position, f->source_id its fid
** when 'gpkg') whose layer has the fields 'fl' (borrowed) so far.
** ST_ERR_NOMEM. */
st_status st_facts_scan_feature(st_facts_scan *sc, st_facts_layer *l, const st_fields *fl,
                                const st_feature *f, int gpkg) ST_MUST_CHECK;
/* The layer ended with fields 'fl': text flags sized, extent computed,
** sc freed. ST_ERR_NOMEM. */
st_status st_facts_scan_end(st_facts_scan *sc, st_facts_layer *l,
                            const st_fields *fl) ST_MUST_CHECK;
void st_facts_scan_free(st_facts_scan *sc);

/* Record in l the size and modification time of l->file. ST_ERR_IO with a
** diagnostic naming the file when it cannot be examined. */
st_status st_facts_stat(st_facts_layer *l, st_diags *diags) ST_MUST_CHECK;

/* 1 when a and b hold the same count, text flags and extent: what a read
** learns about a layer (not how it was read). */
int st_facts_same_content(const st_facts_layer *a, const st_facts_layer *b);

/* ---- the file ------------------------------------------------------------ */

/* Write f (borrowed) to 'path' through a temporary file renamed into
** place; sets f->sha256. ST_ERR_IO (diagnostic) or ST_ERR_NOMEM. */
st_status st_facts_write(st_facts *f, const char *path, st_diags *diags) ST_MUST_CHECK;

/* Read the facts file 'path' into *out (owned; free with st_facts_free).
** ST_ERR_IO when it cannot be read; ST_ERR_FORMAT (diagnostic naming the
** file and line) when it is not a whole, undamaged facts file. */
st_status st_facts_read(const char *path, st_facts *out, st_diags *diags) ST_MUST_CHECK;

/* Largest facts file read (ST_ERR_LIMIT beyond). */
#define ST_FACTS_MAX_BYTES ((size_t)1 << 30)

#endif
