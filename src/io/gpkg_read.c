/*
** io/gpkg_read.c -- the GeoPackage reader: one feature table of an OGC
** GeoPackage 1.x file (SQLite 3), streamed row by row.
**
** Input:   r->path, opened read-only and immutable, so the file is never
**          modified and no -journal, -wal or -shm file appears beside it;
**          r->layer_request names the table when there are several.
**          With r->opt.window (a part given the layer facts, io.h), only
**          the rows whose R-tree box meets the window's boxes (carried
**          into the layer's CRS by PROJ) and the rows it lists, when the
**          R-tree is there and fits; else every row.
** Output:  features with source_id = the integer primary key (fid),
**          attributes as UTF-8 text typed by each column's declared type,
**          geometry decoded by io/gpkg_blob.c; the layer's CRS as
**          "EPSG:n" or the WKT found in gpkg_spatial_ref_sys.
** Errors:  ST_ERR_IO when the file cannot be opened; ST_ERR_FORMAT when it
**          is not an SQLite file, has no gpkg_contents or
**          gpkg_geometry_columns, is damaged or truncated, has no feature
**          table, or a blob does not decode (feature index and fid named);
**          ST_ERR_USAGE for a layer that does not exist or a missing choice
**          among several (the message lists the layers).
** Limits:  a value (blob or text) longer than ST_GPKG_MAX_BLOB is refused
**          by SQLite itself (the connection's length limit): ST_ERR_LIMIT;
**          an attribute value above GPKG_MAX_VALUE bytes: ST_ERR_LIMIT;
**          error messages list at most GPKG_MAX_LISTED layer names.
*/
#include <errno.h>
#include <sqlite3.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <strings.h>
#include <sys/stat.h>

#include "stocktake/geomx.h"
#include "ioInt.h"

#define GPKG_MAX_VALUE ((size_t)64 << 20)
#define GPKG_MAX_LISTED 50

typedef struct gpkg_reader {
    sqlite3 *db;
    sqlite3_stmt *rows;      /* SELECT fid, geom, fields... */
    st_geos *gx;
    char *table;             /* owned */
    char *geom_column;       /* owned */
    long long srs_id;
    int has_fid;             /* result column 0 holds the integer key */
    int done;                /* the statement reached its end */
    long long rows_read;
    char *head;              /* "SELECT fid, geom, fields... FROM t", owned */
    char *fid_col;           /* the quoted key column, owned ("" without) */
    int window_tried;        /* the first next() decided how to read */
    int windowed;            /* reading through r->opt.window */
} gpkg_reader;

st_status st_gpkg_quote_ident(st_buf *b, const char *name)
{
    st_status rc = st_buf_puts(b, "\"");
    for (const char *p = name; rc == ST_OK && *p; p++)
        rc = st_buf_append(b, *p == '"' ? "\"\"" : p, *p == '"' ? 2 : 1);
    return rc == ST_OK ? st_buf_puts(b, "\"") : rc;
}

/* .gpkg by name; any other SQLite file too, so that open() can say it is
** not a GeoPackage (no other format reads SQLite files). */
static int gpkg_probe(const char *path)
{
    if (st_str_ends_with_ci(path, ".gpkg"))
        return 1;
    FILE *f = fopen(path, "rb");
    if (!f)
        return 0;
    char magic[16];
    size_t n = fread(magic, 1, sizeof magic, f);
    fclose(f);
    return n == sizeof magic && memcmp(magic, "SQLite format 3", 16) == 0;
}

/* Map an SQLite result code to our status, with one diagnostic. */
static st_status sql_fail(st_reader *r, int code, long long index, const char *doing)
{
    gpkg_reader *g = r->impl;
    const char *msg = g->db ? sqlite3_errmsg(g->db) : sqlite3_errstr(code);
    switch (code & 0xff) {
    case SQLITE_NOMEM:
        return ST_ERR_NOMEM;
    case SQLITE_NOTADB:
        return st_reader_fail(r, ST_ERR_FORMAT, index,
                              "not a GeoPackage: not an SQLite database");
    case SQLITE_CORRUPT:
        return st_reader_fail(r, ST_ERR_FORMAT, index,
                              "the GeoPackage is damaged or truncated (%s while %s)",
                              msg, doing);
    case SQLITE_TOOBIG:
        return st_reader_fail(r, ST_ERR_LIMIT, index,
                              "a value is longer than the limit of %zu bytes (while %s)",
                              ST_GPKG_MAX_BLOB, doing);
    case SQLITE_IOERR:
        if (code == SQLITE_IOERR_SHORT_READ)
            return st_reader_fail(r, ST_ERR_FORMAT, index,
                                  "the GeoPackage is truncated (while %s)", doing);
        break;
    }
    return st_reader_fail(r, ST_ERR_IO, index, "SQLite error while %s: %s", doing, msg);
}

static st_status prepare(st_reader *r, const char *sql, sqlite3_stmt **s,
                         const char *doing)
{
    gpkg_reader *g = r->impl;
    int rc = sqlite3_prepare_v2(g->db, sql, -1, s, NULL);
    return rc == SQLITE_OK ? ST_OK : sql_fail(r, rc, -1, doing);
}

char *st_gpkg_uri(const char *path, const char *query)
{
    st_buf b;
    st_buf_init(&b, 0);
    st_status rc = st_buf_puts(&b, path[0] == '/' ? "file://" : "file:");
    for (const unsigned char *p = (const unsigned char *)path; rc == ST_OK && *p; p++) {
        if (*p == '%' || *p == '?' || *p == '#' || *p <= 0x20 || *p >= 0x7f)
            rc = st_buf_printf(&b, "%%%02X", *p);
        else
            rc = st_buf_append(&b, (const char *)p, 1);
    }
    if (rc == ST_OK)
        rc = st_buf_printf(&b, "?%s", query);
    if (rc != ST_OK) {
        st_buf_free(&b);
        return NULL;
    }
    return st_buf_take(&b);
}

int st_gpkg_open_readonly(const char *uri, int max_length, sqlite3 **db)
{
    int rc = sqlite3_open_v2(uri, db, SQLITE_OPEN_READONLY | SQLITE_OPEN_URI, NULL);
    if (rc != SQLITE_OK)
        return rc;
    /* A hostile file may carry triggers and views: never let its schema
    ** call functions with side effects, never load extensions. */
    sqlite3_db_config(*db, SQLITE_DBCONFIG_DEFENSIVE, 1, NULL);
#ifdef SQLITE_DBCONFIG_TRUSTED_SCHEMA
    sqlite3_db_config(*db, SQLITE_DBCONFIG_TRUSTED_SCHEMA, 0, NULL);
#endif
    sqlite3_db_config(*db, SQLITE_DBCONFIG_ENABLE_LOAD_EXTENSION, 0, NULL);
    sqlite3_limit(*db, SQLITE_LIMIT_LENGTH, max_length);
    return SQLITE_OK;
}

/* Immutable, or mode=ro when a -wal file beside it holds committed pages
** that immutable would not see (SQLite then manages the -shm file, which
** belongs to the file's own writer). */
static char *read_uri(const char *path)
{
    struct stat st;
    char *wal = st_strdup_printf("%s-wal", path);
    if (!wal)
        return NULL;
    int has_wal = stat(wal, &st) == 0 && st.st_size > 0;
    st_free(wal);
    return st_gpkg_uri(path, has_wal ? "mode=ro" : "immutable=1");
}

/* A file cut short: io/gpkg_core.c's header test. */
static st_status check_size(st_reader *r, long long size)
{
    FILE *f = fopen(r->path, "rb");
    if (!f)
        return st_reader_fail(r, ST_ERR_IO, -1, "cannot open: %s", strerror(errno));
    unsigned char h[100];
    size_t n = fread(h, 1, sizeof h, f);
    fclose(f);
    long long stated = 0;
    switch (st_sqlite_header_check(h, n, size, &stated)) {
    case ST_SQLITE_SHORT_HEADER:
        return st_reader_fail(r, ST_ERR_FORMAT, -1, "the GeoPackage is truncated "
                              "(%lld bytes, less than the 100-byte SQLite header)", size);
    case ST_SQLITE_TRUNCATED:
        return st_reader_fail(r, ST_ERR_FORMAT, -1, "the GeoPackage is truncated: its "
                              "header states %lld bytes, the file has %lld", stated, size);
    default:
        return ST_OK;   /* not SQLite: SQLite itself says so */
    }
}

static st_status open_db(st_reader *r, gpkg_reader *g)
{
    struct stat st;
    if (stat(r->path, &st) != 0)
        return st_reader_fail(r, ST_ERR_IO, -1, "cannot open: %s", strerror(errno));
    if (!S_ISREG(st.st_mode))
        return st_reader_fail(r, ST_ERR_IO, -1, "cannot open: not a regular file");
    r->bytes_total = (long long)st.st_size;
    st_status checked = check_size(r, r->bytes_total);
    if (checked != ST_OK)
        return checked;
    char *uri = read_uri(r->path);
    if (!uri)
        return ST_ERR_NOMEM;
    int rc = st_gpkg_open_readonly(uri, (int)ST_GPKG_MAX_BLOB, &g->db);
    st_free(uri);
    if (rc != SQLITE_OK)
        return sql_fail(r, rc, -1, "opening the file");
    return ST_OK;
}

/* Run a query that yields one integer. */
static st_status query_int(st_reader *r, const char *sql, const char *bind,
                           long long *out, const char *doing)
{
    sqlite3_stmt *s = NULL;
    st_status rc = prepare(r, sql, &s, doing);
    if (rc != ST_OK)
        return rc;
    if (bind)
        sqlite3_bind_text(s, 1, bind, -1, SQLITE_STATIC);
    int step = sqlite3_step(s);
    if (step == SQLITE_ROW)
        *out = sqlite3_column_int64(s, 0);
    else
        rc = sql_fail(r, step == SQLITE_DONE ? SQLITE_ERROR : step, -1, doing);
    sqlite3_finalize(s);
    return rc;
}

static st_status check_is_gpkg(st_reader *r)
{
    long long n = 0;
    st_status rc = query_int(r,
        "SELECT count(*) FROM sqlite_master WHERE type IN ('table', 'view') "
        "AND lower(name) IN ('gpkg_contents', 'gpkg_geometry_columns')",
        NULL, &n, "reading the schema");
    if (rc == ST_OK && n != 2)
        rc = st_reader_fail(r, ST_ERR_FORMAT, -1,
                            "not a GeoPackage: no gpkg_contents or "
                            "gpkg_geometry_columns table");
    return rc;
}

/* The feature tables, in the order they were added to gpkg_contents. */
static const char *const list_sql =
    "SELECT c.table_name, g.column_name, g.srs_id FROM gpkg_contents c "
    "JOIN gpkg_geometry_columns g ON lower(g.table_name) = lower(c.table_name) "
    "WHERE lower(c.data_type) = 'features' ORDER BY c.rowid";

static st_status take_layer(gpkg_reader *g, sqlite3_stmt *s)
{
    st_free(g->table);
    st_free(g->geom_column);
    g->table = st_strdup((const char *)sqlite3_column_text(s, 0));
    const char *col = (const char *)sqlite3_column_text(s, 1);
    g->geom_column = st_strdup(col ? col : "");
    g->srs_id = sqlite3_column_int64(s, 2);
    return g->table && g->geom_column ? ST_OK : ST_ERR_NOMEM;
}

/* A requested layer that is not a feature table: say what it is. */
static st_status no_such_layer(st_reader *r, long long nlayers, const char *names)
{
    sqlite3_stmt *s = NULL;
    st_status rc = prepare(r, "SELECT data_type FROM gpkg_contents "
                              "WHERE lower(table_name) = lower(?)", &s, "reading gpkg_contents");
    if (rc != ST_OK)
        return rc;
    sqlite3_bind_text(s, 1, r->layer_request, -1, SQLITE_STATIC);
    const char *type = sqlite3_step(s) == SQLITE_ROW
                           ? (const char *)sqlite3_column_text(s, 0) : NULL;
    if (type && strcasecmp(type, "features") == 0) {
        rc = st_reader_fail(r, ST_ERR_FORMAT, -1, "layer '%s' has no row in "
                            "gpkg_geometry_columns", r->layer_request);
    } else if (type) {
        rc = st_reader_fail(r, ST_ERR_USAGE, -1,
                            "layer '%s' is a '%s' table, not a feature layer; "
                            "feature layers: %s", r->layer_request, type,
                            nlayers ? names : "none");
    } else {
        rc = st_reader_fail(r, ST_ERR_USAGE, -1, "no layer '%s'; feature layers: %s",
                            r->layer_request, nlayers ? names : "none");
    }
    sqlite3_finalize(s);
    return rc;
}

static st_status choose_layer(st_reader *r, gpkg_reader *g)
{
    sqlite3_stmt *s = NULL;
    st_status rc = prepare(r, list_sql, &s, "reading gpkg_contents");
    if (rc != ST_OK)
        return rc;
    st_buf names;
    st_buf_init(&names, 0);
    long long n = 0;
    int exact = 0, step = SQLITE_DONE;
    while (rc == ST_OK && (step = sqlite3_step(s)) == SQLITE_ROW) {
        const char *name = (const char *)sqlite3_column_text(s, 0);
        if (!name)
            continue;
        if (++n <= GPKG_MAX_LISTED)
            rc = st_buf_printf(&names, "%s%s", n > 1 ? ", " : "", name);
        else if (n == GPKG_MAX_LISTED + 1)
            rc = st_buf_puts(&names, ", ...");
        if (rc != ST_OK)
            break;
        const char *want = r->layer_request;
        if (want ? !exact && (strcmp(name, want) == 0 ||
                              (!g->table && strcasecmp(name, want) == 0))
                 : n == 1) {
            exact = want && strcmp(name, want) == 0;
            rc = take_layer(g, s);
        }
    }
    if (rc == ST_OK && step != SQLITE_DONE)
        rc = sql_fail(r, step, -1, "reading gpkg_contents");
    sqlite3_finalize(s);
    if (rc != ST_OK) {
        st_buf_free(&names);
        return rc;
    }
    if (r->layer_request && !g->table)
        rc = no_such_layer(r, n, names.data);
    else if (n == 0)
        rc = st_reader_fail(r, ST_ERR_FORMAT, -1,
                            "the GeoPackage has no feature layer "
                            "(no 'features' table in gpkg_contents with a geometry column)");
    else if (!r->layer_request && n > 1)
        rc = st_reader_fail(r, ST_ERR_USAGE, -1,
                            "the GeoPackage has %lld feature layers (%s); "
                            "choose one as FILE.gpkg:LAYER", n, names.data);
    st_buf_free(&names);
    return rc;
}

/* EPSG:n when the organisation is EPSG, else the definition; no CRS for
** the undefined systems 0 and -1 (Req 11) or the definition "undefined". */
static st_status read_crs(st_reader *r, gpkg_reader *g)
{
    if (g->srs_id == 0 || g->srs_id == -1)
        return ST_OK;
    sqlite3_stmt *s = NULL;
    st_status rc = prepare(r, "SELECT organization, organization_coordsys_id, definition "
                              "FROM gpkg_spatial_ref_sys WHERE srs_id = ?",
                           &s, "reading gpkg_spatial_ref_sys");
    if (rc != ST_OK)
        return rc;
    sqlite3_bind_int64(s, 1, g->srs_id);
    int step = sqlite3_step(s);
    if (step == SQLITE_ROW) {
        const char *org = (const char *)sqlite3_column_text(s, 0);
        long long id = sqlite3_column_int64(s, 1);
        const char *def = (const char *)sqlite3_column_text(s, 2);
        if (org && strcasecmp(org, "EPSG") == 0 && id > 0)
            rc = (r->crs_def = st_strdup_printf("EPSG:%lld", id)) ? ST_OK : ST_ERR_NOMEM;
        else if (def && def[0] && strcasecmp(def, "undefined") != 0)
            rc = (r->crs_def = st_strdup(def)) ? ST_OK : ST_ERR_NOMEM;
    } else if (step == SQLITE_DONE) {
        st_loc loc = ST_LOC_FILE(r->path);
        st_diags_add(r->diags, ST_SEV_WARNING, ST_ERR_FORMAT, &loc,
                     "srs_id %lld of layer '%s' has no row in gpkg_spatial_ref_sys",
                     g->srs_id, g->table);
    } else {
        rc = sql_fail(r, step, -1, "reading gpkg_spatial_ref_sys");
    }
    sqlite3_finalize(s);
    return rc;
}

/* Field type from a declared column type (GeoPackage 1.2, Table 1). Width
** from "TEXT(n)". Anything not numeric or boolean is read as text: DATE,
** DATETIME, BLOB (as hex). */
static st_field_type field_type_of(const char *decl, int *width)
{
    static const char *const ints[] = {"INTEGER", "INT", "MEDIUMINT", "SMALLINT",
                                       "TINYINT", "BIGINT"};
    static const char *const reals[] = {"REAL", "DOUBLE", "FLOAT"};
    *width = 0;
    if (!decl)
        return ST_FIELD_TEXT;
    const char *paren = strchr(decl, '(');
    size_t n = paren ? (size_t)(paren - decl) : strlen(decl);
    while (n && decl[n - 1] == ' ')
        n--;
    if (paren)
        *width = atoi(paren + 1);
    for (size_t i = 0; i < sizeof ints / sizeof ints[0]; i++)
        if (strlen(ints[i]) == n && strncasecmp(decl, ints[i], n) == 0)
            return ST_FIELD_INTEGER;
    for (size_t i = 0; i < sizeof reals / sizeof reals[0]; i++)
        if (strlen(reals[i]) == n && strncasecmp(decl, reals[i], n) == 0)
            return ST_FIELD_REAL;
    if (n == 7 && strncasecmp(decl, "BOOLEAN", 7) == 0)
        return ST_FIELD_BOOLEAN;
    return ST_FIELD_TEXT;
}

/* Column list: the integer primary key (Req 29) and the geometry column
** are not attributes; every other column is a field, in table order. */
static st_status read_columns(st_reader *r, gpkg_reader *g, st_buf *select)
{
    sqlite3_stmt *s = NULL;
    st_status rc = prepare(r,
        "SELECT name, type, pk, (SELECT count(*) FROM pragma_table_info(?1) "
        "WHERE pk > 0) FROM pragma_table_info(?1)", &s, "reading the table's columns");
    if (rc != ST_OK)
        return rc;
    sqlite3_bind_text(s, 1, g->table, -1, SQLITE_STATIC);
    st_buf fid, fields;
    st_buf_init(&fid, 0);
    st_buf_init(&fields, 0);
    int step = SQLITE_DONE, has_geom = 0, ncols = 0;
    while (rc == ST_OK && (step = sqlite3_step(s)) == SQLITE_ROW) {
        const char *name = (const char *)sqlite3_column_text(s, 0);
        const char *decl = (const char *)sqlite3_column_text(s, 1);
        int pk = sqlite3_column_int(s, 2), npk = sqlite3_column_int(s, 3);
        ncols++;
        if (!name)
            continue;
        if (strcasecmp(name, g->geom_column) == 0) {
            has_geom = 1;
            continue;
        }
        if (pk == 1 && npk == 1 && decl && strcasecmp(decl, "INTEGER") == 0) {
            rc = st_gpkg_quote_ident(&fid, name);
            continue;
        }
        int width;
        st_field_type type = field_type_of(decl, &width);
        char *clean = st_utf8_sanitize(name, strlen(name));
        rc = clean ? st_fields_add(&r->fields, clean, type, width, 0, NULL) : ST_ERR_NOMEM;
        st_free(clean);
        if (rc == ST_OK)
            rc = st_buf_puts(&fields, ", ");
        if (rc == ST_OK)
            rc = st_gpkg_quote_ident(&fields, name);
    }
    if (rc == ST_OK && step != SQLITE_DONE)
        rc = sql_fail(r, step, -1, "reading the table's columns");
    sqlite3_finalize(s);
    if (rc == ST_OK && ncols == 0)
        rc = st_reader_fail(r, ST_ERR_FORMAT, -1,
                            "table '%s' named in gpkg_contents does not exist", g->table);
    else if (rc == ST_OK && !has_geom)
        rc = st_reader_fail(r, ST_ERR_FORMAT, -1,
                            "table '%s' has no column '%s' (named in gpkg_geometry_columns)",
                            g->table, g->geom_column);
    /* SELECT fid, geom, fields... ORDER BY fid; a table without an integer
    ** key (against Req 29) is read in storage order without source ids. */
    g->has_fid = fid.len > 0;
    if (rc == ST_OK)
        rc = st_buf_printf(select, "SELECT %s, ", g->has_fid ? fid.data : "NULL");
    if (rc == ST_OK)
        rc = st_gpkg_quote_ident(select, g->geom_column);
    if (rc == ST_OK && fields.len)
        rc = st_buf_puts(select, fields.data);
    if (rc == ST_OK)
        rc = st_buf_puts(select, " FROM ");
    if (rc == ST_OK)
        rc = st_gpkg_quote_ident(select, g->table);
    if (rc == ST_OK && !(g->head = st_strdup(select->data)))
        rc = ST_ERR_NOMEM;
    if (rc == ST_OK && !(g->fid_col = st_strdup(g->has_fid ? fid.data : "")))
        rc = ST_ERR_NOMEM;
    if (rc == ST_OK && g->has_fid)
        rc = st_buf_printf(select, " ORDER BY %s", fid.data);
    st_buf_free(&fid);
    st_buf_free(&fields);
    return rc;
}

static st_status count_rows(st_reader *r, gpkg_reader *g)
{
    st_buf sql;
    st_buf_init(&sql, 0);
    st_status rc = st_buf_puts(&sql, "SELECT count(*) FROM ");
    if (rc == ST_OK)
        rc = st_gpkg_quote_ident(&sql, g->table);
    if (rc == ST_OK)
        rc = query_int(r, sql.data, NULL, &r->count_hint, "counting the features");
    st_buf_free(&sql);
    return rc;
}

static st_status gpkg_open(st_reader *r)
{
    gpkg_reader *g = st_calloc(1, sizeof *g);
    if (!g)
        return ST_ERR_NOMEM;
    r->impl = g;
    r->schema_fixed = 1;
    st_buf select;
    st_buf_init(&select, 0);
    st_status rc = open_db(r, g);
    if (rc == ST_OK)
        rc = check_is_gpkg(r);
    if (rc == ST_OK)
        rc = choose_layer(r, g);
    if (rc == ST_OK)
        rc = read_crs(r, g);
    if (rc == ST_OK)
        rc = read_columns(r, g, &select);
    if (rc == ST_OK)
        rc = count_rows(r, g);
    if (rc == ST_OK)
        rc = prepare(r, select.data, &g->rows, "preparing the feature query");
    st_buf_free(&select);
    if (rc == ST_OK)
        rc = (g->gx = st_geos_new()) ? ST_OK : ST_ERR_NOMEM;
    if (rc == ST_OK)
        rc = (r->layer_name = st_strdup(g->table)) ? ST_OK : ST_ERR_NOMEM;
    return rc;
}

/* Shortest of %.15g, %.16g, %.17g that reads back as the same double. */
static void format_real(double d, char *out, size_t n)
{
    for (int prec = 15; prec <= 17; prec++) {
        snprintf(out, n, "%.*g", prec, d);
        if (strtod(out, NULL) == d)
            return;
    }
}

static st_status set_hex(st_feature *f, uint32_t i, const unsigned char *p, size_t n)
{
    static const char digits[] = "0123456789abcdef";
    char *hex = st_malloc(2 * n + 1);
    if (!hex)
        return ST_ERR_NOMEM;
    for (size_t k = 0; k < n; k++) {
        hex[2 * k] = digits[p[k] >> 4];
        hex[2 * k + 1] = digits[p[k] & 15];
    }
    st_status rc = st_feature_set_value(f, i, hex, 2 * n);
    st_free(hex);
    return rc;
}

static st_status set_text(st_feature *f, uint32_t i, const char *s, size_t n)
{
    if (st_utf8_valid_prefix(s, n) == n)
        return st_feature_set_value(f, i, s, n);
    char *clean = st_utf8_sanitize(s, n);   /* invalid bytes become U+FFFD */
    st_status rc = clean ? st_feature_set_value(f, i, clean, strlen(clean)) : ST_ERR_NOMEM;
    st_free(clean);
    return rc;
}

/* Attribute i from result column c, by what SQLite stored; booleans as
** true/false, whatever number stores them. */
static st_status read_value(st_reader *r, sqlite3_stmt *s, int c, uint32_t i,
                            st_feature *f)
{
    st_field_type type = r->fields.items[i].type;
    char num[40];
    int storage = sqlite3_column_type(s, c);
    if (storage == SQLITE_NULL)
        return ST_OK;
    if (type == ST_FIELD_BOOLEAN && (storage == SQLITE_INTEGER || storage == SQLITE_FLOAT)) {
        const char *b = sqlite3_column_double(s, c) != 0.0 ? "true" : "false";
        return st_feature_set_value(f, i, b, strlen(b));
    }
    if (storage == SQLITE_INTEGER) {
        snprintf(num, sizeof num, "%lld", (long long)sqlite3_column_int64(s, c));
        return st_feature_set_value(f, i, num, strlen(num));
    }
    if (storage == SQLITE_FLOAT) {
        format_real(sqlite3_column_double(s, c), num, sizeof num);
        return st_feature_set_value(f, i, num, strlen(num));
    }
    const void *p = storage == SQLITE_BLOB ? sqlite3_column_blob(s, c)
                                           : (const void *)sqlite3_column_text(s, c);
    size_t n = (size_t)sqlite3_column_bytes(s, c);
    if (!p && n)
        return ST_ERR_NOMEM;
    if (n > (storage == SQLITE_BLOB ? GPKG_MAX_VALUE / 2 : GPKG_MAX_VALUE))
        return st_reader_fail(r, ST_ERR_LIMIT, (long long)r->next_index,
                              "value of '%s' is %zu bytes (limit %zu)",
                              r->fields.items[i].name, n, GPKG_MAX_VALUE);
    if (storage == SQLITE_BLOB)
        return set_hex(f, i, p, n);
    return set_text(f, i, p ? p : "", n);
}

static st_status read_geometry(st_reader *r, gpkg_reader *g, st_feature *f)
{
    sqlite3_stmt *s = g->rows;
    int storage = sqlite3_column_type(s, 1);
    const char *fid = f->source_id ? f->source_id : "?";
    long long index = (long long)r->next_index;
    if (storage == SQLITE_NULL)
        return ST_OK;   /* a null geometry: the footprint stage sets it aside */
    if (storage != SQLITE_BLOB)
        return st_reader_fail(r, ST_ERR_FORMAT, index,
                              "fid %s: the geometry is not a GeoPackage blob", fid);
    const unsigned char *b = sqlite3_column_blob(s, 1);
    size_t n = (size_t)sqlite3_column_bytes(s, 1);
    if (!b && n)
        return ST_ERR_NOMEM;
    char err[256];
    st_status rc = st_gpkg_blob_decode(g->gx, b ? b : (const unsigned char *)"", n,
                                       &f->geom, err, sizeof err);
    if (rc == ST_ERR_FORMAT || rc == ST_ERR_LIMIT || rc == ST_ERR_GEOS)
        return st_reader_fail(r, rc == ST_ERR_GEOS ? ST_ERR_FORMAT : rc, index,
                              "fid %s: bad geometry blob: %s", fid, err);
    return rc;
}

static st_status read_row(st_reader *r, gpkg_reader *g, st_feature *f)
{
    sqlite3_stmt *s = g->rows;
    if (g->has_fid && sqlite3_column_type(s, 0) != SQLITE_NULL) {
        f->source_id = st_strdup_printf("%lld", (long long)sqlite3_column_int64(s, 0));
        if (!f->source_id)
            return ST_ERR_NOMEM;
    }
    st_status rc = read_geometry(r, g, f);
    for (uint32_t i = 0; rc == ST_OK && i < r->fields.count; i++)
        rc = read_value(r, s, 2 + (int)i, i, f);
    return rc;
}

/* ---- reading through a window (io.h st_read_window) ---------------------- */

/* The R-tree of the layer: "rtree_<table>_<column>" (GeoPackage 1.x,
** extension gpkg_rtree_index), quoted into b; 0 when there is none. */
static int rtree_name(st_reader *r, gpkg_reader *g, st_buf *b)
{
    char *name = st_strdup_printf("rtree_%s_%s", g->table, g->geom_column);
    long long n = 0;
    st_diags quiet;
    st_diags_init(&quiet);
    st_diags *loud = r->diags;
    r->diags = &quiet;   /* a file without one is no error */
    st_status rc = name ? query_int(r, "SELECT count(*) FROM sqlite_master WHERE "
                                       "type = 'table' AND name = ?", name, &n,
                                    "looking for the R-tree") : ST_ERR_NOMEM;
    r->diags = loud;
    st_diags_free(&quiet);
    int ok = rc == ST_OK && n == 1 && st_gpkg_quote_ident(b, name) == ST_OK;
    st_free(name);
    return ok;
}

/* 1 when the R-tree may hold a row for every feature the window does not
** list as always read: no more rows than the table, at least as many as
** the features not listed (a cheap check against a stale R-tree; the
** rows themselves are not compared). */
static int rtree_complete(st_reader *r, const char *rtree)
{
    const st_read_window *w = r->opt.window;
    char *sql = st_strdup_printf("SELECT count(*) FROM %s", rtree);
    long long n = -1;
    st_diags quiet;
    st_diags_init(&quiet);
    st_diags *loud = r->diags;
    r->diags = &quiet;
    st_status rc = sql ? query_int(r, sql, NULL, &n, "counting the R-tree") : ST_ERR_NOMEM;
    r->diags = loud;
    st_diags_free(&quiet);
    st_free(sql);
    return rc == ST_OK && n >= 0 && (uint64_t)n <= w->count &&
           (uint64_t)n + w->nalways >= w->count && (uint64_t)r->count_hint == w->count;
}

/* The window's boxes in the layer's own coordinates: how many (0: none
** can be carried there, read every row). A feature of a projected layer
** comes out of PROJ in lon/lat range (or not finite: then it is one the
** caller lists as always read), so the part of a box beyond the poles
** (a swapped box) meets none and is cut off. */
static int source_boxes(st_reader *r, double box[2][4])
{
    const st_read_window *w = r->opt.window;
    int n = 0;
    for (int k = 0; k < w->nbox; k++) {
        if (!r->xform) {
            memcpy(box[n++], w->box[k], sizeof box[k]);
            continue;
        }
        double ll[4];
        memcpy(ll, w->box[k], sizeof ll);
        ll[1] = ll[1] < -90 ? -90 : ll[1];
        ll[3] = ll[3] > 90 ? 90 : ll[3];
        ll[0] = ll[0] < -180 ? -180 : ll[0];
        ll[2] = ll[2] > 180 ? 180 : ll[2];
        if (ll[1] >= ll[3] || ll[0] >= ll[2])
            continue;
        if (st_crs_box_to_source(r->xform, ll, box[n++]) != ST_OK)
            return 0;
    }
    return n;
}

static st_status window_sql(st_reader *r, gpkg_reader *g, const char *rtree,
                            const double box[2][4], int nbox, st_buf *sql)
{
    const st_read_window *w = r->opt.window;
    st_status rc = st_buf_printf(sql, "%s WHERE %s IN (", g->head, g->fid_col);
    for (int k = 0; rc == ST_OK && k < nbox; k++)
        rc = st_buf_printf(sql, "%sSELECT id FROM %s WHERE minx <= %.17g AND maxx >= %.17g "
                           "AND miny <= %.17g AND maxy >= %.17g", k ? " UNION " : "", rtree,
                           box[k][2], box[k][0], box[k][3], box[k][1]);
    for (size_t i = 0; rc == ST_OK && i < w->nalways; i++)
        rc = st_buf_printf(sql, "%s(%lld)", i ? ", " : nbox ? " UNION VALUES " : "VALUES ",
                           (long long)(w->fid_min + (int64_t)w->always[i]));
    if (rc == ST_OK)
        rc = st_buf_printf(sql, ") ORDER BY %s", g->fid_col);
    return rc;
}

/* Before the first row: read through the window when the layer allows
** it (io.h), else go on with every row. */
static st_status try_window(st_reader *r, gpkg_reader *g)
{
    const st_read_window *w = r->opt.window;
    g->window_tried = 1;
    if (!w || !g->has_fid || w->nalways > ST_READ_WINDOW_MAX_ALWAYS || w->nbox < 1 ||
        w->nbox > 2)
        return ST_OK;
    st_buf rtree, sql;
    st_buf_init(&rtree, 0);
    st_buf_init(&sql, 0);
    double box[2][4];
    int nbox = 0;
    st_status rc = ST_OK;
    if (rtree_name(r, g, &rtree) && rtree_complete(r, rtree.data) &&
        (nbox = source_boxes(r, box)) > 0)
        rc = window_sql(r, g, rtree.data, box, nbox, &sql);
    sqlite3_stmt *s = NULL;
    if (rc == ST_OK && sql.len)
        rc = prepare(r, sql.data, &s, "preparing the windowed query");
    if (rc == ST_OK && s) {
        sqlite3_finalize(g->rows);
        g->rows = s;
        g->windowed = 1;
    }
    st_buf_free(&rtree);
    st_buf_free(&sql);
    return rc;
}

/* A row read through the window: its position from its fid. */
static st_status window_position(st_reader *r, gpkg_reader *g)
{
    const st_read_window *w = r->opt.window;
    int64_t fid = sqlite3_column_int64(g->rows, 0);
    if (sqlite3_column_type(g->rows, 0) != SQLITE_INTEGER || fid < w->fid_min ||
        (uint64_t)(fid - w->fid_min) >= w->count)
        return st_reader_fail(r, ST_ERR_FORMAT, -1, "fid %lld is outside the fids %lld.."
                              "%lld the layer facts give: the layer changed since",
                              (long long)fid, (long long)w->fid_min,
                              (long long)(w->fid_min + (int64_t)w->count - 1));
    r->next_index = (uint64_t)(fid - w->fid_min);
    return ST_OK;
}

int st_gpkg_reader_windowed(const st_reader *r)
{
    const gpkg_reader *g = r->fmt == &st_gpkg_reader_format ? r->impl : NULL;
    return g && g->windowed;
}

static st_status gpkg_next(st_reader *r, st_feature **out)
{
    gpkg_reader *g = r->impl;
    *out = NULL;
    if (g->done)
        return ST_OK;   /* stepping again would restart the query */
    if (!g->window_tried) {
        st_status rc = try_window(r, g);
        if (rc != ST_OK)
            return rc;
    }
    int step = sqlite3_step(g->rows);
    if (step == SQLITE_DONE) {
        g->done = 1;
        r->bytes_done = r->bytes_total;
        return ST_OK;
    }
    if (step != SQLITE_ROW)
        return sql_fail(r, step, (long long)r->next_index, "reading a feature");
    if (g->windowed) {
        st_status rc = window_position(r, g);
        if (rc != ST_OK)
            return rc;
    }
    st_feature *f = st_feature_new();
    if (!f)
        return ST_ERR_NOMEM;
    st_status rc = read_row(r, g, f);
    if (rc != ST_OK) {
        st_feature_free(f);
        return rc;
    }
    /* Progress in bytes is estimated from the share of rows read. */
    g->rows_read++;
    if (r->count_hint > 0)
        r->bytes_done = (long long)((double)r->bytes_total * (double)g->rows_read /
                                    (double)r->count_hint);
    *out = f;
    return ST_OK;
}

static void gpkg_close(st_reader *r)
{
    gpkg_reader *g = r->impl;
    if (!g)
        return;
    sqlite3_finalize(g->rows);
    sqlite3_close_v2(g->db);
    st_geos_free(g->gx);
    st_free(g->table);
    st_free(g->geom_column);
    st_free(g->head);
    st_free(g->fid_col);
    st_free(g);
    r->impl = NULL;
}

const st_reader_format st_gpkg_reader_format = {
    "gpkg", gpkg_probe, gpkg_open, gpkg_next, gpkg_close,
};
