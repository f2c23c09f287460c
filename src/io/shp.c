/*
** io/shp.c -- placeholder until the shp format lands.
*/
#include "ioInt.h"

static int shp_probe(const char *path) { (void)path; return 0; }
static st_status shp_open(st_reader *r) { return st_reader_fail(r, ST_ERR_FORMAT, -1, "shp reading is not built yet"); }
static st_status shp_next(st_reader *r, st_feature **out) { (void)r; *out = NULL; return ST_OK; }
static void shp_close(st_reader *r) { (void)r; }
const st_reader_format st_shp_reader_format = {"shp", shp_probe, shp_open, shp_next, shp_close};

static const char *const shp_ext[] = {".shp-unbuilt", NULL};
static st_status shp_wopen(st_writer *w) { return st_writer_fail(w, ST_ERR_USAGE, "shp writing is not built yet"); }
static st_status shp_begin(st_writer *w, const char *n, const st_fields *f, st_geom_type t) { (void)w; (void)n; (void)f; (void)t; return ST_ERR_USAGE; }
static st_status shp_write(st_writer *w, const st_feature *f) { (void)w; (void)f; return ST_ERR_USAGE; }
static st_status shp_end(st_writer *w) { (void)w; return ST_ERR_USAGE; }
static st_status shp_finish(st_writer *w) { (void)w; return ST_ERR_USAGE; }
static void shp_discard(st_writer *w) { (void)w; }
const st_writer_format st_shp_writer_format = {"shp", shp_ext, 0, shp_wopen, shp_begin, shp_write, shp_end, shp_finish, NULL, shp_discard};
