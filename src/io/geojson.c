/*
** io/geojson.c -- placeholder until the geojson format lands.
*/
#include "ioInt.h"

static int geojson_probe(const char *path) { (void)path; return 0; }
static st_status geojson_open(st_reader *r) { return st_reader_fail(r, ST_ERR_FORMAT, -1, "geojson reading is not built yet"); }
static st_status geojson_next(st_reader *r, st_feature **out) { (void)r; *out = NULL; return ST_OK; }
static void geojson_close(st_reader *r) { (void)r; }
const st_reader_format st_geojson_reader_format = {"geojson", geojson_probe, geojson_open, geojson_next, geojson_close};

static int geojsonl_probe(const char *path) { (void)path; return 0; }
static st_status geojsonl_open(st_reader *r) { return st_reader_fail(r, ST_ERR_FORMAT, -1, "geojsonl reading is not built yet"); }
static st_status geojsonl_next(st_reader *r, st_feature **out) { (void)r; *out = NULL; return ST_OK; }
static void geojsonl_close(st_reader *r) { (void)r; }
const st_reader_format st_geojsonl_reader_format = {"geojsonl", geojsonl_probe, geojsonl_open, geojsonl_next, geojsonl_close};

static const char *const geojson_ext[] = {".geojson-unbuilt", NULL};
static st_status geojson_wopen(st_writer *w) { return st_writer_fail(w, ST_ERR_USAGE, "geojson writing is not built yet"); }
static st_status geojson_begin(st_writer *w, const char *n, const st_fields *f, st_geom_type t) { (void)w; (void)n; (void)f; (void)t; return ST_ERR_USAGE; }
static st_status geojson_write(st_writer *w, const st_feature *f) { (void)w; (void)f; return ST_ERR_USAGE; }
static st_status geojson_end(st_writer *w) { (void)w; return ST_ERR_USAGE; }
static st_status geojson_finish(st_writer *w) { (void)w; return ST_ERR_USAGE; }
static void geojson_discard(st_writer *w) { (void)w; }
const st_writer_format st_geojson_writer_format = {"geojson", geojson_ext, 0, geojson_wopen, geojson_begin, geojson_write, geojson_end, geojson_finish, NULL, geojson_discard};

static const char *const geojsonl_ext[] = {".geojsonl-unbuilt", NULL};
static st_status geojsonl_wopen(st_writer *w) { return st_writer_fail(w, ST_ERR_USAGE, "geojsonl writing is not built yet"); }
static st_status geojsonl_begin(st_writer *w, const char *n, const st_fields *f, st_geom_type t) { (void)w; (void)n; (void)f; (void)t; return ST_ERR_USAGE; }
static st_status geojsonl_write(st_writer *w, const st_feature *f) { (void)w; (void)f; return ST_ERR_USAGE; }
static st_status geojsonl_end(st_writer *w) { (void)w; return ST_ERR_USAGE; }
static st_status geojsonl_finish(st_writer *w) { (void)w; return ST_ERR_USAGE; }
static void geojsonl_discard(st_writer *w) { (void)w; }
const st_writer_format st_geojsonl_writer_format = {"geojsonl", geojsonl_ext, 0, geojsonl_wopen, geojsonl_begin, geojsonl_write, geojsonl_end, geojsonl_finish, NULL, geojsonl_discard};
