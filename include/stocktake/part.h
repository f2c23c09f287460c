/*
** stocktake/part.h -- a part: what `run --tile` / `run --bbox` writes and
** `merge` reads back to finish the job (docs/scale.md).
**
** A part holds the buildings a tile owns (every feature whose point falls
** in the tile, kept or set aside) in the state the stages left them after
** rules and before defaults: geometry, source attributes, status, reason,
** measures, flags, district, schema values with provenance and rule. Also
** the findings about those buildings, per input layer its totals and
** fields, the unmapped value counts, the input files' hashes, and the
** run's context (key/value: the tile, the fingerprint of the rules,
** districts and options, ...), so merge can check the parts belong
** together.
**
** The file is a GeoPackage 1.2 with attribute tables only
** (gpkg_contents data_type 'attributes'): GDAL opens it, but only merge
** reads it. Features are stored as one blob each (st_feature_encode) with
** their bid as primary key; findings in order with their own columns.
** Writing goes to a temporary name and is renamed into place by
** st_part_writer_commit; nothing is left behind without a commit.
** Reading checks the application id / part format version and every blob;
** a damaged part is ST_ERR_FORMAT with the file and the bid in the
** diagnostic.
*/
#ifndef STOCKTAKE_PART_H
#define STOCKTAKE_PART_H

#include <stdint.h>

#include "stocktake/core.h"
#include "stocktake/feature.h"
#include "stocktake/finding.h"
#include "stocktake/strtab.h"

/* Bumped when the layout changes; merge refuses parts of another version. */
#define ST_PART_FORMAT_VERSION 1

/* ---- the feature codec ------------------------------------------------ */

/*
** Append the whole of 'f' (borrowed) to 'out': layer, index, source_id,
** geom, source_geom (type, has_z/has_m, parts, rings, coordinates bit for
** bit), source values (NULL kept apart from ""), bid, status, reason,
** duplicate_of, area_m2, perimeter_m (bit for bit), flags, district,
** schema values (text or NULL, provenance, rule string or NULL).
** Little-endian, fixed-width integers, a leading format byte (layout in
** src/core/feature_codec.c). ST_ERR_USAGE when 'f' could not be decoded
** back (geometry offsets not from 0, decreasing or not ending at the
** count; status or provenance out of range; district below -1);
** ST_ERR_LIMIT when a string is 4 GiB or more or 'out' would pass its
** limit; ST_ERR_NOMEM. On failure 'out' is unchanged.
*/
st_status st_feature_encode(const st_feature *f, st_buf *out) ST_MUST_CHECK;

/*
** Decode data[0..n) into a new feature: *out returns owned (free with
** st_feature_free), NULL on failure. The schema values' rule strings are
** interned in 'strings' (borrowed; they stay valid as long as it does).
** A truncated, over-long or inconsistent blob (ring/part offsets out of
** range, counts beyond the bytes left, unknown enum values) is
** ST_ERR_FORMAT; ST_ERR_NOMEM on no memory. Only what st_feature_encode
** writes is accepted, so a decoded feature encodes to the same bytes. The
** source values come back packed (st_feature_pack_values); the geometry
** arrays sized to their contents. 'strings' may be NULL when no schema
** value names a rule (ST_ERR_USAGE otherwise); its limits give
** ST_ERR_LIMIT. Nothing is interned from a record that does not decode.
*/
st_status st_feature_decode(const void *data, size_t n, st_strtab *strings,
                            st_feature **out) ST_MUST_CHECK;

/* ---- writing a part ---------------------------------------------------- */

typedef struct st_part_layer {
    const char *name, *path, *format, *crs;  /* borrowed (writer) / owned (reader) */
    uint64_t read;                  /* features in the whole layer */
    st_fields fields;               /* its source fields (writer: borrowed) */
} st_part_layer;

typedef struct st_part_file {
    const char *role, *path;        /* as st_report_file */
    char sha256[65];
    uint64_t bytes;
} st_part_file;

typedef struct st_part_writer st_part_writer;

/* Create the part at 'path' (under a temporary name until commit). A
** diagnostic names the path on failure; *out NULL then. */
st_status st_part_writer_open(const char *path, st_diags *diags,
                              st_part_writer **out) ST_MUST_CHECK;
/* Key/value context rows (2 * n strings, borrowed; a value may be NULL).
** Keys starting with "part_" are the part's own (its format version, the
** row counts commit records): ST_ERR_USAGE, as for a key written twice. */
st_status st_part_write_info(st_part_writer *w, const char *const *kv,
                             size_t n) ST_MUST_CHECK;
st_status st_part_write_layers(st_part_writer *w, const st_part_layer *layers,
                               size_t n) ST_MUST_CHECK;
st_status st_part_write_files(st_part_writer *w, const st_part_file *files,
                              size_t n) ST_MUST_CHECK;
/* One feature (borrowed). 'shared' is 1 for a feature every part holds
** (one without coordinates, which no tile owns): merge keeps one copy.
** A bid written twice is ST_ERR_USAGE, one above INT64_MAX ST_ERR_LIMIT
** (SQLite's integer key). */
st_status st_part_write_feature(st_part_writer *w, const st_feature *f,
                                int shared) ST_MUST_CHECK;
/* Every finding of 'f' (borrowed), in order. */
st_status st_part_write_findings(st_part_writer *w, const st_findings *f) ST_MUST_CHECK;
/* Unmapped counts: n rows (field, value, count); 'dropped' the values the
** counter could not hold. */
st_status st_part_write_unmapped(st_part_writer *w, const char *const *field,
                                 const char *const *value, const uint64_t *count,
                                 size_t n, uint64_t dropped) ST_MUST_CHECK;
st_status st_part_writer_commit(st_part_writer *w) ST_MUST_CHECK;
/* Close; without a commit the temporary file is removed. NULL ok. */
void st_part_writer_close(st_part_writer *w);

/* ---- reading a part ---------------------------------------------------- */

typedef struct st_part st_part;

/* Open a part for reading (read-only; the file is never changed). Checks
** that it is a part of ST_PART_FORMAT_VERSION. */
st_status st_part_open(const char *path, st_diags *diags, st_part **out) ST_MUST_CHECK;
void st_part_close(st_part *p);
const char *st_part_path(const st_part *p);
/* Context value for 'key', or NULL (borrowed from p). */
const char *st_part_info(const st_part *p, const char *key);
/* Layers and files (owned by p). */
const st_part_layer *st_part_layers(const st_part *p, size_t *n);
const st_part_file *st_part_files(const st_part *p, size_t *n);
/* The next feature in bid order: *out owned (NULL at the end), *shared as
** written. Rule strings interned in 'strings'. At the end the number of
** features is checked against the one committed. After ST_ERR_FORMAT (or
** another failure but ST_ERR_NOMEM) every later call returns it again. */
st_status st_part_next_feature(st_part *p, st_strtab *strings, st_feature **out,
                               int *shared) ST_MUST_CHECK;
/* Append every finding to 'dst' in the order written; codes are interned
** in 'strings' (a finding's code must outlive it). All or nothing: on
** failure 'dst' is as it was. x/y come back bit for bit, NaN as NaN, but a
** zero loses its sign (SQLite's REAL). */
st_status st_part_read_findings(st_part *p, st_strtab *strings,
                                st_findings *dst) ST_MUST_CHECK;
/* Add the unmapped counts to 'add(ud, field, value, count)' in the order
** written, stopping at the first status it returns other than ST_OK;
** *dropped gets the part's dropped count. */
st_status st_part_read_unmapped(st_part *p,
                                st_status (*add)(void *ud, const char *field,
                                                 const char *value, uint64_t count),
                                void *ud, uint64_t *dropped) ST_MUST_CHECK;

#endif
