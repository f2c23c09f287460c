/*
** io/partInt.h -- what the part writer (io/part_write.c) and reader
** (io/part_read.c) agree on beyond part.h: the reserved part_info keys.
**
** On disk (GeoPackage 1.2, every table an 'attributes' row of
** gpkg_contents, every integer a signed 64-bit SQLite integer holding the
** uint64_t's bits):
**   part_info     (id INTEGER PRIMARY KEY, key TEXT UNIQUE, value TEXT)
**   part_layers   (id = position + 1, name, path, format, crs, read)
**   part_fields   (id, layer = part_layers.id, name, type, width, decimals)
**                 in field order
**   part_files    (id, role, path, sha256, bytes)
**   part_features (bid INTEGER PRIMARY KEY, shared 0/1, data BLOB)
**                 data = st_feature_encode of the feature, whose bid is
**                 the row's
**   part_findings (seq INTEGER PRIMARY KEY, bid, code, severity, message,
**                 x, y) with severity the st_severity value, x/y NULL for
**                 NaN (SQLite keeps every other double except the sign of
**                 a zero: -0.0 reads back as 0.0)
**   part_unmapped (id, field, value, count)
** Keys starting with "part_" in part_info are the writer's own; the caller
** cannot set them.
*/
#ifndef STOCKTAKE_PART_INT_H
#define STOCKTAKE_PART_INT_H

#define PART_KEY_PREFIX "part_"
#define PART_KEY_FORMAT "part_format"             /* ST_PART_FORMAT_VERSION */
#define PART_KEY_FEATURES "part_features"         /* rows of part_features */
#define PART_KEY_FINDINGS "part_findings"         /* rows of part_findings */
#define PART_KEY_UNMAPPED "part_unmapped"         /* rows of part_unmapped */
#define PART_KEY_DROPPED "part_unmapped_dropped"  /* values not counted */

#endif
