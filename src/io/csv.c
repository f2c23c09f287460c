/*
** io/csv.c -- placeholder until the csv format lands.
*/
#include "ioInt.h"

static const char *const csv_ext[] = {".csv-unbuilt", NULL};
static st_status csv_wopen(st_writer *w) { return st_writer_fail(w, ST_ERR_USAGE, "csv writing is not built yet"); }
static st_status csv_begin(st_writer *w, const char *n, const st_fields *f, st_geom_type t) { (void)w; (void)n; (void)f; (void)t; return ST_ERR_USAGE; }
static st_status csv_write(st_writer *w, const st_feature *f) { (void)w; (void)f; return ST_ERR_USAGE; }
static st_status csv_end(st_writer *w) { (void)w; return ST_ERR_USAGE; }
static st_status csv_finish(st_writer *w) { (void)w; return ST_ERR_USAGE; }
static void csv_discard(st_writer *w) { (void)w; }
const st_writer_format st_csv_writer_format = {"csv", csv_ext, 0, csv_wopen, csv_begin, csv_write, csv_end, csv_finish, NULL, csv_discard};
