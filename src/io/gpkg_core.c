/*
** io/gpkg_core.c -- what every GeoPackage this project writes begins with
** (the inventory's, io/gpkg_write.c, and a part's, io/part_write.c): the
** core tables and the definition of WGS 84, kept in one place so the two
** files stay the same GeoPackage; and the test both readers make of an
** SQLite file's header.
*/
#include <string.h>

#include "ioInt.h"

/* EPSG's WKT 1 definition of WGS 84 (EPSG:4326), as in the GeoPackage
** specification's table of the mandatory rows. */
const char st_gpkg_wgs84_wkt[] =
    "GEOGCS[\"WGS 84\",DATUM[\"WGS_1984\",SPHEROID[\"WGS 84\",6378137,"
    "298.257223563,AUTHORITY[\"EPSG\",\"7030\"]],AUTHORITY[\"EPSG\",\"6326\"]],"
    "PRIMEM[\"Greenwich\",0,AUTHORITY[\"EPSG\",\"8901\"]],UNIT[\"degree\","
    "0.0174532925199433,AUTHORITY[\"EPSG\",\"9122\"]],AUTHORITY[\"EPSG\",\"4326\"]]";

/* Core tables, as GeoPackage 1.2 Annex C defines them, and two of the
** three mandatory spatial reference systems (Req 10, 11, 13, 21, 58; the
** writers insert EPSG:4326 with st_gpkg_wgs84_wkt). */
const char st_gpkg_core_sql[] =
    "CREATE TABLE gpkg_spatial_ref_sys (srs_name TEXT NOT NULL, "
    "srs_id INTEGER NOT NULL PRIMARY KEY, organization TEXT NOT NULL, "
    "organization_coordsys_id INTEGER NOT NULL, definition TEXT NOT NULL, "
    "description TEXT);"
    "CREATE TABLE gpkg_contents (table_name TEXT NOT NULL PRIMARY KEY, "
    "data_type TEXT NOT NULL, identifier TEXT UNIQUE, description TEXT DEFAULT '', "
    "last_change DATETIME NOT NULL DEFAULT (strftime('%Y-%m-%dT%H:%M:%fZ','now')), "
    "min_x DOUBLE, min_y DOUBLE, max_x DOUBLE, max_y DOUBLE, srs_id INTEGER, "
    "CONSTRAINT fk_gc_r_srs_id FOREIGN KEY (srs_id) REFERENCES "
    "gpkg_spatial_ref_sys(srs_id));"
    "CREATE TABLE gpkg_geometry_columns (table_name TEXT NOT NULL, "
    "column_name TEXT NOT NULL, geometry_type_name TEXT NOT NULL, "
    "srs_id INTEGER NOT NULL, z TINYINT NOT NULL, m TINYINT NOT NULL, "
    "CONSTRAINT pk_geom_cols PRIMARY KEY (table_name, column_name), "
    "CONSTRAINT uk_gc_table_name UNIQUE (table_name), "
    "CONSTRAINT fk_gc_tn FOREIGN KEY (table_name) REFERENCES gpkg_contents(table_name), "
    "CONSTRAINT fk_gc_srs FOREIGN KEY (srs_id) REFERENCES gpkg_spatial_ref_sys (srs_id));"
    "INSERT INTO gpkg_spatial_ref_sys VALUES ('Undefined cartesian SRS', -1, 'NONE', -1, "
    "'undefined', 'undefined cartesian coordinate reference system');"
    "INSERT INTO gpkg_spatial_ref_sys VALUES ('Undefined geographic SRS', 0, 'NONE', 0, "
    "'undefined', 'undefined geographic coordinate reference system');";

static uint32_t be32(const unsigned char *p)
{
    return (uint32_t)p[0] << 24 | (uint32_t)p[1] << 16 | (uint32_t)p[2] << 8 | p[3];
}

/* SQLite reads a short last page as zeros, so a file cut inside its last
** page would pass unnoticed: compare the size with the page count the
** header states (trusted when the "version-valid-for" number at offset 92
** equals the change counter at offset 24, as SQLite does). */
int st_sqlite_header_check(const unsigned char *h, size_t n, long long size, long long *stated)
{
    if (n < 16 || memcmp(h, "SQLite format 3", 16) != 0)
        return ST_SQLITE_NOT_SQLITE;
    if (n < 100)
        return ST_SQLITE_SHORT_HEADER;
    long long page = (long long)(h[16] << 8 | h[17]);
    if (page == 1)
        page = 65536;
    long long pages = be32(h + 28);
    *stated = page * pages;
    if (pages && be32(h + 92) == be32(h + 24) && page * pages > size)
        return ST_SQLITE_TRUNCATED;
    return ST_SQLITE_OK;
}
