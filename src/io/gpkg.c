/*
** io/gpkg.c -- placeholder until the gpkg format lands.
*/
#include "ioInt.h"

static int gpkg_probe(const char *path) { (void)path; return 0; }
static st_status gpkg_open(st_reader *r) { return st_reader_fail(r, ST_ERR_FORMAT, -1, "gpkg reading is not built yet"); }
static st_status gpkg_next(st_reader *r, st_feature **out) { (void)r; *out = NULL; return ST_OK; }
static void gpkg_close(st_reader *r) { (void)r; }
const st_reader_format st_gpkg_reader_format = {"gpkg", gpkg_probe, gpkg_open, gpkg_next, gpkg_close};

static const char *const gpkg_ext[] = {".gpkg-unbuilt", NULL};
static st_status gpkg_wopen(st_writer *w) { return st_writer_fail(w, ST_ERR_USAGE, "gpkg writing is not built yet"); }
static st_status gpkg_begin(st_writer *w, const char *n, const st_fields *f, st_geom_type t) { (void)w; (void)n; (void)f; (void)t; return ST_ERR_USAGE; }
static st_status gpkg_write(st_writer *w, const st_feature *f) { (void)w; (void)f; return ST_ERR_USAGE; }
static st_status gpkg_end(st_writer *w) { (void)w; return ST_ERR_USAGE; }
static st_status gpkg_finish(st_writer *w) { (void)w; return ST_ERR_USAGE; }
static void gpkg_discard(st_writer *w) { (void)w; }
const st_writer_format st_gpkg_writer_format = {"gpkg", gpkg_ext, 0, gpkg_wopen, gpkg_begin, gpkg_write, gpkg_end, gpkg_finish, NULL, gpkg_discard};
