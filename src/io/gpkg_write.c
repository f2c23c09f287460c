/*
** io/gpkg_write.c -- the GeoPackage writer: any number of layers in one
** OGC GeoPackage 1.2 file (OGC 12-128r), each a feature table with an
** R-tree spatial index, or an attributes table for a layer without
** geometry.
**
** Input:   layers begun with a field list and a declared geometry type;
**          features in lon/lat WGS 84, as every reader yields them, so
**          every geometry is written with srs_id 4326.
** Output:  w->tmp_path, which the generic code renames on commit: a
**          GeoPackage 1.2 (application_id "GPKG", user_version 10200,
**          Req 2) with gpkg_spatial_ref_sys holding the rows 4326, -1 and 0
**          (Req 11), gpkg_contents whose extent is computed from the very
**          doubles written in the blob envelopes, so every envelope lies
**          inside it (Req 148), gpkg_geometry_columns, and per feature
**          table 'rtree_<table>_geom' with the triggers of the
**          gpkg_rtree_index extension, registered in gpkg_extensions.
** Errors:  ST_ERR_IO for an SQLite failure (its message is kept);
**          ST_ERR_USAGE for a reserved or repeated layer name or a geometry
**          that does not fit the declared type; ST_ERR_LIMIT for a blob
**          above ST_GPKG_MAX_BLOB or more than GPKG_MAX_FIELDS fields.
**          After an SQLite failure the writer refuses further work, and
**          discard() removes the temporary file.
** Speed:   one transaction for the whole file, prepared statements that
**          insert many rows each, rows prepared on helper threads
**          (st_writer_write_rows; one thread inserts, so the connection
**          needs no mutex), and journal_mode=OFF with synchronous=OFF,
**          locking_mode=EXCLUSIVE. No journal is safe here because
**          the file is a temporary one that only a successful commit renames
**          into place: a crash leaves a stray temporary file, never a
**          damaged output, so the journal would protect nothing.
*/
#include <ctype.h>
#include <errno.h>
#include <math.h>
#include <pthread.h>
#include <sqlite3.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <strings.h>

#include "ioInt.h"

/* SQLite's default limit is 2000 columns; fid and geom take two. */
#define GPKG_MAX_FIELDS 1998
#define GPKG_SRS_ID 4326
/* Rows a statement inserts at most (see prepare_many). */
#define GPKG_ROWS_PER_INSERT 32

enum { CELL_NULL, CELL_INT, CELL_REAL, CELL_TEXT, CELL_BLOB };

typedef struct gpkg_cell {
    uint32_t kind;          /* CELL_* */
    uint32_t len;           /* TEXT, BLOB: bytes */
    union {
        int64_t i;
        double d;
        size_t off;         /* TEXT, BLOB: where in the batch's bytes */
    } v;
} gpkg_cell;

/* Why a geometry could not be prepared; told by the inserting thread. */
enum { FAULT_NONE, FAULT_TYPE, FAULT_SIZE };

typedef struct gpkg_batch {
    size_t first;           /* row number of the first row */
    size_t count;           /* rows prepared */
    size_t cap;             /* rows the arrays hold */
    st_status rc;           /* ST_OK, or why row first + count was not */
    int fault;              /* FAULT_*, with rc */
    uint64_t fault_index;   /* the feature's index, for the message */
    st_geom_type fault_type;
    gpkg_cell *cells;       /* cap * ncells, owned */
    double *env;            /* 4 per row: minx, miny, maxx, maxy */
    unsigned char *has_env; /* per row */
    st_buf bytes;           /* blobs and texts of the rows, owned */
    size_t seq;             /* ring: the batch this slot is for */
    int ready;              /* ring: prepared, waiting to be inserted */
} gpkg_batch;

typedef struct gpkg_layer {
    char *table;                /* owned */
    int has_geom;
    st_geom_type declared;
    uint32_t nfields;
    st_field_type *types;       /* owned, one per field */
    sqlite3_stmt *insert;
    double extent[4];           /* minx, miny, maxx, maxy */
    int has_extent;
    uint64_t written;
    size_t ncells;              /* parameters of a row: geom (if any) + fields */
    sqlite3_stmt *insert_many;  /* 'many' rows in one statement, or NULL */
    size_t many;
    gpkg_batch one;             /* st_writer_write's row, once prepared */
    st_gpkg_box *boxes;         /* owned: the R-tree entries so far */
    size_t nboxes, capboxes;
} gpkg_layer;

typedef struct gpkg_writer {
    sqlite3 *db;
    int failed;                 /* an SQLite call failed: file unusable */
    int in_layer;
    gpkg_layer layer;
    st_buf blob;                /* reused for every geometry */
} gpkg_writer;

static const char *const gpkg_extensions_list[] = {".gpkg", NULL};

/* The GeoPackage extensions table (the R-tree extension is registered in it),
** after the core tables of io/gpkg_core.c. */
static const char extensions_sql[] =
    "CREATE TABLE gpkg_extensions (table_name TEXT, column_name TEXT, "
    "extension_name TEXT NOT NULL, definition TEXT NOT NULL, scope TEXT NOT NULL, "
    "CONSTRAINT ge_tce UNIQUE (table_name, column_name, extension_name))";

/* ---- SQLite helpers -------------------------------------------------------- */

static st_status sql_error(st_writer *w, int code, const char *doing)
{
    gpkg_writer *g = w->impl;
    g->failed = 1;
    if ((code & 0xff) == SQLITE_NOMEM)
        return ST_ERR_NOMEM;
    return st_writer_fail(w, ST_ERR_IO, "SQLite error while %s: %s", doing,
                          g->db ? sqlite3_errmsg(g->db) : sqlite3_errstr(code));
}

static st_status exec(st_writer *w, const char *sql, const char *doing)
{
    gpkg_writer *g = w->impl;
    int rc = sqlite3_exec(g->db, sql, NULL, NULL, NULL);
    return rc == SQLITE_OK ? ST_OK : sql_error(w, rc, doing);
}

static st_status prepare(st_writer *w, const char *sql, sqlite3_stmt **s,
                         const char *doing)
{
    gpkg_writer *g = w->impl;
    int rc = sqlite3_prepare_v2(g->db, sql, -1, s, NULL);
    return rc == SQLITE_OK ? ST_OK : sql_error(w, rc, doing);
}

/* Step a statement that returns no row, then reset it. */
static st_status step_done(st_writer *w, sqlite3_stmt *s, const char *doing)
{
    int rc = sqlite3_step(s);
    sqlite3_reset(s);
    return rc == SQLITE_DONE ? ST_OK : sql_error(w, rc, doing);
}

/* ST_MinX, ST_MaxX, ST_MinY, ST_MaxY and ST_IsEmpty over our own blobs,
** which always carry an envelope when not empty. They fill the R-tree after
** the bulk insert, the way the extension's triggers would row by row. */
static void sql_envelope(sqlite3_context *ctx, int argc, sqlite3_value **argv)
{
    (void)argc;
    int which = (int)(intptr_t)sqlite3_user_data(ctx);
    st_gpkg_header h;
    if (sqlite3_value_type(argv[0]) != SQLITE_BLOB ||
        st_gpkg_blob_header(sqlite3_value_blob(argv[0]),
                            (size_t)sqlite3_value_bytes(argv[0]), &h, NULL, 0) != ST_OK) {
        sqlite3_result_null(ctx);
        return;
    }
    if (which == 4)
        sqlite3_result_int(ctx, h.empty);
    else if (h.empty || h.envelope_code == 0)
        sqlite3_result_null(ctx);
    else
        sqlite3_result_double(ctx, h.envelope[which]);   /* minx, maxx, miny, maxy */
}

static st_status register_functions(st_writer *w)
{
    static const char *const names[] = {"ST_MinX", "ST_MaxX", "ST_MinY", "ST_MaxY",
                                        "ST_IsEmpty"};
    gpkg_writer *g = w->impl;
    for (intptr_t i = 0; i < 5; i++) {
        int rc = sqlite3_create_function_v2(g->db, names[i], 1,
                                            SQLITE_UTF8 | SQLITE_DETERMINISTIC,
                                            (void *)i, sql_envelope, NULL, NULL, NULL);
        if (rc != SQLITE_OK)
            return sql_error(w, rc, "registering the envelope functions");
    }
    return ST_OK;
}

/* ---- open ------------------------------------------------------------------ */

static st_status gpkg_wopen(st_writer *w)
{
    gpkg_writer *g = st_calloc(1, sizeof *g);
    if (!g)
        return ST_ERR_NOMEM;
    w->impl = g;
    st_buf_init(&g->blob, ST_GPKG_MAX_BLOB);
    remove(w->tmp_path);   /* a stale temporary file of ours, if any */
    char *uri = st_gpkg_uri(w->tmp_path, "mode=rwc");
    if (!uri)
        return ST_ERR_NOMEM;
    /* NOMUTEX: one thread at a time uses the connection (helpers that
    ** prepare rows never touch it), so SQLite need not lock it per call. */
    int rc = sqlite3_open_v2(uri, &g->db,
                             SQLITE_OPEN_READWRITE | SQLITE_OPEN_CREATE | SQLITE_OPEN_URI |
                                 SQLITE_OPEN_NOMUTEX, NULL);
    st_free(uri);
    if (rc != SQLITE_OK)
        return sql_error(w, rc, "creating the temporary file");
    /* See the file comment for why no journal is safe. */
    st_status st = exec(w, "PRAGMA application_id = 1196444487;"   /* 0x47504B47 "GPKG" */
                           "PRAGMA user_version = 10200;"          /* GeoPackage 1.2.0 */
                           "PRAGMA journal_mode = OFF;"
                           "PRAGMA synchronous = OFF;"
                           "PRAGMA locking_mode = EXCLUSIVE;"
                           "PRAGMA cache_size = -32768;",
                        "setting up the file");
    if (st == ST_OK)
        st = register_functions(w);
    if (st == ST_OK)
        st = exec(w, "BEGIN", "starting the transaction");
    if (st == ST_OK)
        st = exec(w, st_gpkg_core_sql, "creating the GeoPackage tables");
    if (st == ST_OK)
        st = exec(w, extensions_sql, "creating the GeoPackage tables");
    sqlite3_stmt *s = NULL;
    if (st == ST_OK)
        st = prepare(w, "INSERT INTO gpkg_spatial_ref_sys VALUES ('WGS 84 geodetic', "
                        "4326, 'EPSG', 4326, ?, 'longitude/latitude coordinates in "
                        "decimal degrees on the WGS 84 spheroid')", &s, "adding EPSG:4326");
    if (st == ST_OK) {
        sqlite3_bind_text(s, 1, st_gpkg_wgs84_wkt, -1, SQLITE_STATIC);
        st = step_done(w, s, "adding EPSG:4326");
    }
    sqlite3_finalize(s);
    return st;
}

/* ---- layers ---------------------------------------------------------------- */

static void batch_free(gpkg_batch *b);
static st_status batch_init(gpkg_batch *b, size_t rows, size_t ncells);

static void layer_free(gpkg_layer *l)
{
    sqlite3_finalize(l->insert);
    sqlite3_finalize(l->insert_many);
    batch_free(&l->one);
    st_free(l->table);
    st_free(l->types);
    st_free(l->boxes);
    memset(l, 0, sizeof *l);
}

/* The column name type for a declared geometry type (Req 25, 31). */
static const char *geometry_type_name(st_geom_type t)
{
    return t == ST_GEOM_OTHER ? "GEOMETRY" : st_geom_type_name(t);
}

static st_status check_layer_name(st_writer *w, const char *name)
{
    static const char *const reserved[] = {"gpkg_", "rtree_", "sqlite_"};
    if (!name || !name[0])
        return st_writer_fail(w, ST_ERR_USAGE, "a layer needs a name");
    for (size_t i = 0; i < sizeof reserved / sizeof reserved[0]; i++)
        if (strncasecmp(name, reserved[i], strlen(reserved[i])) == 0)
            return st_writer_fail(w, ST_ERR_USAGE,
                                  "layer name '%s' is reserved (it starts with '%s')",
                                  name, reserved[i]);
    sqlite3_stmt *s = NULL;
    st_status rc = prepare(w, "SELECT 1 FROM sqlite_master WHERE lower(name) = lower(?)",
                           &s, "checking the layer name");
    if (rc != ST_OK)
        return rc;
    sqlite3_bind_text(s, 1, name, -1, SQLITE_STATIC);
    int step = sqlite3_step(s);
    sqlite3_finalize(s);
    if (step == SQLITE_ROW)
        return st_writer_fail(w, ST_ERR_USAGE, "layer '%s' is already in the file", name);
    return step == SQLITE_DONE ? ST_OK : sql_error(w, step, "checking the layer name");
}

static int name_taken(char **names, uint32_t n, const char *name)
{
    if (strcasecmp(name, "fid") == 0 || strcasecmp(name, "geom") == 0)
        return 1;
    for (uint32_t i = 0; i < n; i++)
        if (strcasecmp(names[i], name) == 0)
            return 1;
    return 0;
}

/* Column name of field i: its own, or 'src_' + it when it collides with
** fid or geom (as DESIGN.md asks of every output), then '_2', '_3'... while
** it still collides (SQLite column names ignore case). Renames go to notes. */
static st_status column_name(st_writer *w, const char *table, const char *field,
                             uint32_t i, char **names, char **out)
{
    char *base = field[0] ? st_strdup(field) : st_strdup_printf("field_%u", i + 1);
    if (base && (strcasecmp(base, "fid") == 0 || strcasecmp(base, "geom") == 0)) {
        char *prefixed = st_strdup_printf("src_%s", base);
        st_free(base);
        base = prefixed;
    }
    if (!base)
        return ST_ERR_NOMEM;
    char *name = st_strdup(base);
    for (unsigned k = 2; name && name_taken(names, i, name); k++) {
        st_free(name);
        name = st_strdup_printf("%s_%u", base, k);
    }
    st_free(base);
    if (!name)
        return ST_ERR_NOMEM;
    st_status rc = ST_OK;
    if (strcmp(name, field) != 0)
        rc = st_buf_printf(&w->notes, "%s: field '%s' -> column '%s'\n", table, field, name);
    if (rc != ST_OK) {
        st_free(name);
        return rc;
    }
    *out = name;
    return ST_OK;
}

static const char *column_type(st_field_type t)
{
    switch (t) {
    case ST_FIELD_INTEGER: return "INTEGER";
    case ST_FIELD_REAL: return "REAL";
    case ST_FIELD_BOOLEAN: return "BOOLEAN";
    case ST_FIELD_TEXT:
    case ST_FIELD_JSON: break;   /* JSON is kept as its text */
    }
    return "TEXT";
}

/* CREATE TABLE and the INSERT statement's SQL for the layer. */
static st_status layer_sql(st_writer *w, const char *table, const st_fields *fields,
                           st_geom_type type, st_buf *create, st_buf *insert)
{
    char **names = st_calloc(fields->count + 1, sizeof *names);
    if (!names)
        return ST_ERR_NOMEM;
    int geom = type != ST_GEOM_NULL;
    st_status rc = st_buf_puts(create, "CREATE TABLE ");
    if (rc == ST_OK)
        rc = st_gpkg_quote_ident(create, table);
    if (rc == ST_OK)
        rc = st_buf_printf(create, " (\"fid\" INTEGER PRIMARY KEY AUTOINCREMENT NOT NULL%s%s",
                           geom ? ", \"geom\" " : "", geom ? geometry_type_name(type) : "");
    if (rc == ST_OK)
        rc = st_buf_puts(insert, "INSERT INTO ");
    if (rc == ST_OK)
        rc = st_gpkg_quote_ident(insert, table);
    if (rc == ST_OK)
        rc = st_buf_printf(insert, " (\"fid\"%s", geom ? ", \"geom\"" : "");
    for (uint32_t i = 0; rc == ST_OK && i < fields->count; i++) {
        rc = column_name(w, table, fields->items[i].name, i, names, &names[i]);
        if (rc == ST_OK)
            rc = st_buf_puts(create, ", ");
        if (rc == ST_OK)
            rc = st_gpkg_quote_ident(create, names[i]);
        if (rc == ST_OK)
            rc = st_buf_printf(create, " %s", column_type(fields->items[i].type));
        if (rc == ST_OK)
            rc = st_buf_puts(insert, ", ");
        if (rc == ST_OK)
            rc = st_gpkg_quote_ident(insert, names[i]);
    }
    if (rc == ST_OK)
        rc = st_buf_puts(create, ")");
    if (rc == ST_OK)
        rc = st_buf_puts(insert, ") VALUES (NULL");
    for (uint32_t i = 0; rc == ST_OK && i < fields->count + (uint32_t)geom; i++)
        rc = st_buf_puts(insert, ", ?");
    if (rc == ST_OK)
        rc = st_buf_puts(insert, ")");
    for (uint32_t i = 0; i < fields->count; i++)
        st_free(names[i]);
    st_free(names);
    return rc;
}

/* Rows of gpkg_contents and, for a feature table, gpkg_geometry_columns. */
static st_status register_layer(st_writer *w, const char *table, st_geom_type type)
{
    int geom = type != ST_GEOM_NULL;
    sqlite3_stmt *s = NULL;
    st_status rc = prepare(w,
        "INSERT INTO gpkg_contents (table_name, data_type, identifier, description, "
        "last_change, srs_id) VALUES (?1, ?2, ?1, '', ?4, ?3)", &s, "adding to gpkg_contents");
    if (rc != ST_OK)
        return rc;
    /* SOURCE_DATE_EPOCH when set (reproducible files); the spec's form
    ** has milliseconds: 2026-12-02T04:10:00.000Z */
    char when[32], stamp[40];
    st_now_iso8601(when);
    snprintf(stamp, sizeof stamp, "%.*s.000Z", (int)strlen(when) - 1, when);
    sqlite3_bind_text(s, 4, stamp, -1, SQLITE_TRANSIENT);
    sqlite3_bind_text(s, 1, table, -1, SQLITE_STATIC);
    sqlite3_bind_text(s, 2, geom ? "features" : "attributes", -1, SQLITE_STATIC);
    if (geom)
        sqlite3_bind_int(s, 3, GPKG_SRS_ID);
    rc = step_done(w, s, "adding to gpkg_contents");
    sqlite3_finalize(s);
    if (rc != ST_OK || !geom)
        return rc;
    rc = prepare(w, "INSERT INTO gpkg_geometry_columns VALUES (?, 'geom', ?, ?, 0, 0)",
                 &s, "adding to gpkg_geometry_columns");
    if (rc != ST_OK)
        return rc;
    sqlite3_bind_text(s, 1, table, -1, SQLITE_STATIC);
    sqlite3_bind_text(s, 2, geometry_type_name(type), -1, SQLITE_STATIC);
    sqlite3_bind_int(s, 3, GPKG_SRS_ID);
    rc = step_done(w, s, "adding to gpkg_geometry_columns");
    sqlite3_finalize(s);
    return rc;
}

/* The statement that inserts l->many rows at once: the one-row insert
** with its row of parameters repeated. One statement a row costs more than
** the row itself (the statement's start and end, AUTOINCREMENT's
** sqlite_sequence update), and the file is the same either way. */
static st_status prepare_many(st_writer *w, gpkg_layer *l, const st_buf *insert)
{
    gpkg_writer *g = w->impl;
    size_t vars = (size_t)sqlite3_limit(g->db, SQLITE_LIMIT_VARIABLE_NUMBER, -1);
    l->many = l->ncells ? vars / l->ncells : GPKG_ROWS_PER_INSERT;
    if (l->many > GPKG_ROWS_PER_INSERT)
        l->many = GPKG_ROWS_PER_INSERT;
    if (l->many < 2)
        return ST_OK;
    const char *row = strrchr(insert->data, '(');   /* "(NULL, ?, ...)" */
    st_buf sql;
    st_buf_init(&sql, 0);
    st_status rc = st_buf_append(&sql, insert->data, (size_t)(row - insert->data));
    for (size_t i = 0; rc == ST_OK && i < l->many; i++) {
        if (i)
            rc = st_buf_puts(&sql, ", ");
        if (rc == ST_OK)
            rc = st_buf_puts(&sql, row);
    }
    if (rc == ST_OK)
        rc = prepare(w, sql.data, &l->insert_many, "preparing the insert");
    st_buf_free(&sql);
    return rc;
}

static st_status gpkg_begin(st_writer *w, const char *name, const st_fields *fields,
                            st_geom_type type)
{
    gpkg_writer *g = w->impl;
    if (g->failed)
        return st_writer_fail(w, ST_ERR_IO, "the output is unusable after an earlier error");
    if (fields->count > GPKG_MAX_FIELDS)
        return st_writer_fail(w, ST_ERR_LIMIT, "layer '%s' has %u fields (limit %d)",
                              name, fields->count, GPKG_MAX_FIELDS);
    st_status rc = check_layer_name(w, name);
    if (rc != ST_OK)
        return rc;
    gpkg_layer *l = &g->layer;
    l->has_geom = type != ST_GEOM_NULL;
    l->declared = type;
    l->nfields = fields->count;
    l->table = st_strdup(name);
    l->types = st_malloc((fields->count + 1) * sizeof *l->types);
    if (!l->table || !l->types) {
        layer_free(l);
        return ST_ERR_NOMEM;
    }
    for (uint32_t i = 0; i < fields->count; i++)
        l->types[i] = fields->items[i].type;
    st_buf create, insert;
    st_buf_init(&create, 0);
    st_buf_init(&insert, 0);
    rc = layer_sql(w, name, fields, type, &create, &insert);
    if (rc == ST_OK)
        rc = exec(w, create.data, "creating the layer's table");
    if (rc == ST_OK)
        rc = register_layer(w, name, type);
    if (rc == ST_OK)
        rc = prepare(w, insert.data, &l->insert, "preparing the insert");
    l->ncells = (size_t)l->has_geom + fields->count;
    if (rc == ST_OK)
        rc = batch_init(&l->one, 1, l->ncells);
    if (rc == ST_OK)
        rc = prepare_many(w, l, &insert);
    st_buf_free(&create);
    st_buf_free(&insert);
    if (rc != ST_OK) {
        layer_free(l);
        return rc;
    }
    g->in_layer = 1;
    return ST_OK;
}

/* ---- features -------------------------------------------------------------- */

static st_geom_type multi_of(st_geom_type t)
{
    switch (t) {
    case ST_GEOM_POINT: return ST_GEOM_MULTIPOINT;
    case ST_GEOM_LINESTRING: return ST_GEOM_MULTILINESTRING;
    case ST_GEOM_POLYGON: return ST_GEOM_MULTIPOLYGON;
    default: return t;
    }
}

/* The type to write g as in a layer declared 'declared', or ST_GEOM_NULL
** when it does not fit. A single geometry goes into a multi layer as a
** one-part multi, a multi of at most one part into a single layer (same
** parts, same rings: only the type changes); a collection is written as a
** multipolygon (st_geom keeps only its polygons). */
static st_geom_type fit_type(st_geom_type declared, const st_geom *g)
{
    st_geom_type t = g->type == ST_GEOM_COLLECTION ? ST_GEOM_MULTIPOLYGON : g->type;
    if (declared == ST_GEOM_OTHER || declared == t)
        return t;
    if (declared == ST_GEOM_COLLECTION)   /* holds multi types (Req 32) */
        return multi_of(t);
    if (declared == multi_of(t))
        return declared;
    if (multi_of(declared) == t && g->nparts <= 1)
        return declared;
    return ST_GEOM_NULL;
}

static int parse_boolean(const char *v, int *out)
{
    static const char *const yes[] = {"true", "1", "yes"};
    static const char *const no[] = {"false", "0", "no"};
    for (size_t i = 0; i < sizeof yes / sizeof yes[0]; i++) {
        if (strcasecmp(v, yes[i]) == 0)
            return *out = 1, 1;
        if (strcasecmp(v, no[i]) == 0)
            return *out = 0, 1;
    }
    return 0;
}

/* 1 if v is a whole decimal integer (no spaces, in range): *out gets it. */
static int parse_integer(const char *v, long long *out)
{
    char *end;
    if (!v[0] || isspace((unsigned char)v[0]))
        return 0;
    errno = 0;
    *out = strtoll(v, &end, 10);
    return !*end && errno == 0;
}

/* 1 if v is a whole finite number (no spaces, no NaN: SQLite would store
** NaN as NULL). */
static int parse_real(const char *v, double *out)
{
    char *end;
    if (st_parse_decimal_fast(v, out))   /* strtod's result, without strtod */
        return 1;
    if (!v[0] || isspace((unsigned char)v[0]))
        return 0;
    errno = 0;
    *out = strtod(v, &end);
    return !*end && errno == 0 && isfinite(*out);
}

/* ---- preparing rows ---------------------------------------------------------
** A row is made ready in two steps. Preparing (prepare_row) turns the
** feature into cells: the geometry encoded as a blob, each value parsed by
** its column's type; it reads only the layer's declaration, so any thread
** may prepare rows. Inserting (insert_batch) binds the cells and steps the
** statement, keeps each row's R-tree box and grows the extent, in row order,
** on the thread that owns the connection. */

static void batch_free(gpkg_batch *b)
{
    if (!b)
        return;
    st_free(b->cells);
    st_free(b->env);
    st_free(b->has_env);
    st_buf_free(&b->bytes);
    memset(b, 0, sizeof *b);
}

static st_status batch_init(gpkg_batch *b, size_t rows, size_t ncells)
{
    memset(b, 0, sizeof *b);
    st_buf_init(&b->bytes, 0);
    b->cap = rows;
    b->cells = st_malloc(rows * (ncells ? ncells : 1) * sizeof *b->cells);
    b->env = st_malloc(rows * 4 * sizeof *b->env);
    b->has_env = st_malloc(rows);
    if (b->cells && b->env && b->has_env)
        return ST_OK;
    batch_free(b);
    return ST_ERR_NOMEM;
}

static void batch_start(gpkg_batch *b, size_t first)
{
    b->first = first;
    b->count = 0;
    b->rc = ST_OK;
    b->fault = FAULT_NONE;
    st_buf_clear(&b->bytes);
}

static st_status cell_bytes(gpkg_batch *b, gpkg_cell *c, uint32_t kind, const char *p,
                            size_t n)
{
    c->kind = kind;
    c->len = (uint32_t)n;
    c->v.off = b->bytes.len;
    return n ? st_buf_append(&b->bytes, p, n) : ST_OK;
}

/* The cell of the geometry and the row's envelope. */
static st_status prepare_geometry(const gpkg_layer *l, const st_feature *f, gpkg_batch *b,
                                  gpkg_cell *c, double *env, unsigned char *has_env,
                                  st_buf *blob)
{
    const st_geom *src = &f->geom;
    *has_env = 0;
    if (src->type == ST_GEOM_NULL || src->type == ST_GEOM_OTHER || st_geom_is_empty(src)) {
        /* OTHER keeps no coordinates (feature.h): nothing to write. An
        ** empty geometry is stored as NULL too, as GDAL does: GDAL 3.6's
        ** validate_gpkg.py reads the empty flag from bit 3 instead of the
        ** spec's bit 4 (REFERENCES.md section 5), so a spec-correct empty
        ** blob fails it. The set_aside reason still says it was empty. */
        c->kind = CELL_NULL;
        return ST_OK;
    }
    st_geom as = *src;   /* shallow: only the type may differ */
    as.type = fit_type(l->declared, src);
    if (as.type == ST_GEOM_NULL) {
        b->fault = FAULT_TYPE;
        b->fault_index = f->index;
        b->fault_type = src->type;
        return ST_ERR_USAGE;
    }
    int has;
    st_status rc = st_gpkg_blob_encode(&as, GPKG_SRS_ID, blob, env, &has);
    if (rc == ST_ERR_LIMIT) {
        b->fault = FAULT_SIZE;
        b->fault_index = f->index;
    }
    if (rc != ST_OK)
        return rc;
    *has_env = (unsigned char)has;
    return cell_bytes(b, c, CELL_BLOB, blob->data, blob->len);
}

/* The cell of value v in a column of type 'type'. A text that does not
** parse as the type is stored as text all the same: SQLite keeps it, and
** losing a source value would be worse than a typed column holding text.
** (SQLite's column affinity may still turn a number written with spaces
** around it into a number.) */
static st_status prepare_value(gpkg_batch *b, gpkg_cell *c, st_field_type type,
                               const char *v)
{
    long long n;
    double d;
    int bo;
    if (!v) {
        c->kind = CELL_NULL;
    } else if (type == ST_FIELD_INTEGER && parse_integer(v, &n)) {
        c->kind = CELL_INT;
        c->v.i = n;
    } else if (type == ST_FIELD_REAL && parse_real(v, &d)) {
        c->kind = CELL_REAL;
        c->v.d = d;
    } else if (type == ST_FIELD_BOOLEAN && parse_boolean(v, &bo)) {
        c->kind = CELL_INT;
        c->v.i = bo;
    } else {
        return cell_bytes(b, c, CELL_TEXT, v, strlen(v));
    }
    return ST_OK;
}

/* Append f as the next row of batch b (which has room); 'blob' is the
** caller's scratch buffer. On failure b->rc and b->fault say why. */
static st_status prepare_row(const gpkg_layer *l, const st_feature *f, gpkg_batch *b,
                             st_buf *blob)
{
    size_t r = b->count;
    gpkg_cell *c = b->cells + r * l->ncells;
    b->has_env[r] = 0;
    st_status rc = ST_OK;
    if (l->has_geom)
        rc = prepare_geometry(l, f, b, c++, b->env + 4 * r, &b->has_env[r], blob);
    for (uint32_t i = 0; rc == ST_OK && i < l->nfields; i++)
        rc = prepare_value(b, c++, l->types[i], st_feature_value(f, i));
    if (rc == ST_OK)
        b->count++;
    else
        b->rc = rc;
    return rc;
}

/* ---- inserting rows -------------------------------------------------------- */

static void bind_cells(sqlite3_stmt *s, int p, const gpkg_cell *c, size_t n,
                       const char *bytes)
{
    for (size_t i = 0; i < n; i++, p++, c++) {
        switch (c->kind) {
        case CELL_INT: sqlite3_bind_int64(s, p, c->v.i); break;
        case CELL_REAL: sqlite3_bind_double(s, p, c->v.d); break;
        case CELL_TEXT:
            sqlite3_bind_text(s, p, bytes + c->v.off, (int)c->len, SQLITE_STATIC);
            break;
        case CELL_BLOB:
            sqlite3_bind_blob(s, p, bytes + c->v.off, (int)c->len, SQLITE_STATIC);
            break;
        default: sqlite3_bind_null(s, p); break;
        }
    }
}

/* Remember the R-tree entry of row 'id' with envelope env (minx, miny,
** maxx, maxy): the tree is packed and written in one go when the layer
** ends (io/gpkg_rtree.c). Grow the layer's extent. */
static st_status keep_box(st_writer *w, gpkg_layer *l, int64_t id, const double *env)
{
    if (l->nboxes == l->capboxes) {
        size_t cap = l->capboxes ? l->capboxes * 2 : 1024;
        st_gpkg_box *a = st_realloc(l->boxes, cap * sizeof *a);
        if (!a)
            return st_writer_fail(w, ST_ERR_NOMEM, "out of memory");
        l->boxes = a;
        l->capboxes = cap;
    }
    l->boxes[l->nboxes++] = (st_gpkg_box){
        id, {st_gpkg_rtree_down(env[0]), st_gpkg_rtree_up(env[2]),
             st_gpkg_rtree_down(env[1]), st_gpkg_rtree_up(env[3])}};
    if (!l->has_extent) {
        memcpy(l->extent, env, sizeof l->extent);
        l->has_extent = 1;
    } else {
        if (env[0] < l->extent[0]) l->extent[0] = env[0];
        if (env[1] < l->extent[1]) l->extent[1] = env[1];
        if (env[2] > l->extent[2]) l->extent[2] = env[2];
        if (env[3] > l->extent[3]) l->extent[3] = env[3];
    }
    return ST_OK;
}

/* Insert the prepared rows of b in order, l->many rows a statement while
** that many are left; then report why b stopped short, if it did. */
static st_status insert_batch(st_writer *w, gpkg_batch *b)
{
    gpkg_writer *g = w->impl;
    gpkg_layer *l = &g->layer;
    st_status rc = ST_OK;
    for (size_t r = 0; rc == ST_OK && r < b->count;) {
        size_t m = l->insert_many && b->count - r >= l->many ? l->many : 1;
        sqlite3_stmt *s = m > 1 ? l->insert_many : l->insert;
        bind_cells(s, 1, b->cells + r * l->ncells, m * l->ncells, b->bytes.data);
        rc = step_done(w, s, "inserting a feature");
        /* fid is NULL in the insert, so the rows get consecutive ids */
        int64_t last = sqlite3_last_insert_rowid(g->db);
        for (size_t k = 0; rc == ST_OK && k < m; k++)
            if (b->has_env[r + k])
                rc = keep_box(w, l, last - (int64_t)(m - 1 - k), b->env + 4 * (r + k));
        if (rc == ST_OK)
            l->written += m;
        r += m;
    }
    if (rc != ST_OK || b->rc == ST_OK)
        return rc;
    if (b->fault == FAULT_TYPE)
        return st_writer_fail(w, ST_ERR_USAGE, "layer '%s' is declared %s; feature %llu is a %s",
                              l->table, geometry_type_name(l->declared),
                              (unsigned long long)b->fault_index,
                              st_geom_type_name(b->fault_type));
    if (b->fault == FAULT_SIZE)
        return st_writer_fail(w, b->rc, "layer '%s', feature %llu: geometry larger than %zu bytes",
                              l->table, (unsigned long long)b->fault_index, ST_GPKG_MAX_BLOB);
    return b->rc;
}

static st_status usable(st_writer *w)
{
    gpkg_writer *g = w->impl;
    if (g->failed || !g->in_layer)
        return st_writer_fail(w, g->failed ? ST_ERR_IO : ST_ERR_USAGE,
                              g->failed ? "the output is unusable after an earlier error"
                                        : "a feature was written outside a layer");
    return ST_OK;
}

static st_status gpkg_write(st_writer *w, const st_feature *f)
{
    st_status rc = usable(w);
    if (rc != ST_OK)
        return rc;
    gpkg_writer *g = w->impl;
    gpkg_layer *l = &g->layer;
    batch_start(&l->one, 0);
    prepare_row(l, f, &l->one, &g->blob);
    return insert_batch(w, &l->one);
}

/* ---- many rows: helper threads prepare, this thread inserts ----------------
** Rows go in batches of GPKG_BATCH_ROWS (the same batches for any number of
** threads, so the same statements run in the same order). Helpers take the
** batches in order and prepare each into a slot of a ring; batch b uses
** slot b % nslots once batch b - nslots has been inserted. The inserting
** thread takes the slots in batch order. */

#define GPKG_BATCH_ROWS 256
#define GPKG_MAX_HELPERS 16

typedef struct gpkg_maker {   /* what one preparing thread owns */
    st_row row;
    st_buf blob;
} gpkg_maker;

typedef struct gpkg_ring {
    pthread_mutex_t lock;
    pthread_cond_t changed;      /* a slot became ready or free, or stop */
    gpkg_batch *slots;
    size_t nslots;
    size_t next;                 /* the next batch a helper takes */
    size_t nbatches;
    int stop;                    /* the inserting thread is done */
    const gpkg_layer *layer;
    size_t n;
    st_row_fill fill;
    void *ctx;
} gpkg_ring;

typedef struct gpkg_helper {
    gpkg_ring *ring;
    gpkg_maker maker;
    pthread_t tid;
} gpkg_helper;

static st_status maker_init(gpkg_maker *m, uint32_t nvalues)
{
    st_buf_init(&m->blob, ST_GPKG_MAX_BLOB);
    return st_writer_row_init(&m->row, nvalues);
}

static void maker_free(gpkg_maker *m)
{
    st_writer_row_free(&m->row);
    st_buf_free(&m->blob);
}

/* Fill and prepare the rows of batch 'index' into b; stops at the first
** row that fails (b->rc). */
static void make_batch(const gpkg_ring *ring, gpkg_maker *m, gpkg_batch *b, size_t index)
{
    size_t first = index * GPKG_BATCH_ROWS;
    size_t end = first + GPKG_BATCH_ROWS < ring->n ? first + GPKG_BATCH_ROWS : ring->n;
    batch_start(b, first);
    for (size_t k = first; k < end; k++) {
        st_status rc = st_writer_row_fill(&m->row, ring->fill, ring->ctx, k);
        if (rc != ST_OK) {
            b->rc = rc;
            return;
        }
        if (prepare_row(ring->layer, &m->row.f, b, &m->blob) != ST_OK)
            return;
    }
}

static void *helper_main(void *arg)
{
    gpkg_helper *h = arg;
    gpkg_ring *ring = h->ring;
    pthread_mutex_lock(&ring->lock);
    while (!ring->stop && ring->next < ring->nbatches) {
        size_t index = ring->next++;
        gpkg_batch *b = &ring->slots[index % ring->nslots];
        while (!ring->stop && b->seq != index)
            pthread_cond_wait(&ring->changed, &ring->lock);
        if (ring->stop)
            break;
        pthread_mutex_unlock(&ring->lock);
        make_batch(ring, &h->maker, b, index);
        pthread_mutex_lock(&ring->lock);
        b->ready = 1;
        pthread_cond_broadcast(&ring->changed);
    }
    pthread_mutex_unlock(&ring->lock);
    return NULL;
}

/* Insert every batch as the helpers make them ready. */
static st_status insert_from_ring(st_writer *w, gpkg_ring *ring)
{
    st_status rc = ST_OK;
    for (size_t index = 0; rc == ST_OK && index < ring->nbatches; index++) {
        gpkg_batch *b = &ring->slots[index % ring->nslots];
        pthread_mutex_lock(&ring->lock);
        while (!(b->seq == index && b->ready))
            pthread_cond_wait(&ring->changed, &ring->lock);
        pthread_mutex_unlock(&ring->lock);
        rc = insert_batch(w, b);
        pthread_mutex_lock(&ring->lock);
        b->ready = 0;
        b->seq = index + ring->nslots;
        pthread_cond_broadcast(&ring->changed);
        pthread_mutex_unlock(&ring->lock);
    }
    return rc;
}

/* Every batch made and inserted by this thread, through slot 0. */
static st_status write_alone(st_writer *w, gpkg_ring *ring)
{
    gpkg_maker m;
    st_status rc = maker_init(&m, w->nfields);
    for (size_t index = 0; rc == ST_OK && index < ring->nbatches; index++) {
        make_batch(ring, &m, &ring->slots[0], index);
        rc = insert_batch(w, &ring->slots[0]);
    }
    maker_free(&m);
    return rc;
}

/* Start up to 'want' helpers; returns how many started. A thread that
** cannot be started is not an error: fewer helpers do the work, or none,
** and then this thread does it alone. No memory is (*rc). */
static unsigned start_helpers(gpkg_ring *ring, gpkg_helper *h, unsigned want,
                              uint32_t nvalues, st_status *rc)
{
    unsigned started = 0;
    for (unsigned i = 0; i < want; i++) {
        h[i].ring = ring;
        *rc = maker_init(&h[i].maker, nvalues);
        if (*rc != ST_OK || pthread_create(&h[i].tid, NULL, helper_main, &h[i]) != 0) {
            maker_free(&h[i].maker);
            break;
        }
        started++;
    }
    return started;
}

static st_status write_threaded(st_writer *w, gpkg_ring *ring, unsigned want)
{
    gpkg_helper h[GPKG_MAX_HELPERS];
    if (pthread_mutex_init(&ring->lock, NULL) != 0)
        return write_alone(w, ring);
    if (pthread_cond_init(&ring->changed, NULL) != 0) {
        pthread_mutex_destroy(&ring->lock);
        return write_alone(w, ring);
    }
    st_status rc = ST_OK;
    unsigned started = start_helpers(ring, h, want, w->nfields, &rc);
    if (rc == ST_OK)
        rc = started > 0 ? insert_from_ring(w, ring) : write_alone(w, ring);
    pthread_mutex_lock(&ring->lock);
    ring->stop = 1;
    pthread_cond_broadcast(&ring->changed);
    pthread_mutex_unlock(&ring->lock);
    for (unsigned i = 0; i < started; i++) {
        pthread_join(h[i].tid, NULL);
        maker_free(&h[i].maker);
    }
    pthread_cond_destroy(&ring->changed);
    pthread_mutex_destroy(&ring->lock);
    return rc;
}

static st_status gpkg_write_rows(st_writer *w, size_t n, st_row_fill fill, void *ctx,
                                 unsigned nthreads)
{
    st_status rc = usable(w);
    if (rc != ST_OK)
        return rc;
    gpkg_writer *g = w->impl;
    gpkg_ring ring;
    memset(&ring, 0, sizeof ring);
    ring.layer = &g->layer;
    ring.n = n;
    ring.fill = fill;
    ring.ctx = ctx;
    ring.nbatches = (n + GPKG_BATCH_ROWS - 1) / GPKG_BATCH_ROWS;
    unsigned helpers = nthreads > 1 ? nthreads : 0;
    if (helpers > GPKG_MAX_HELPERS)
        helpers = GPKG_MAX_HELPERS;
    if (helpers > ring.nbatches)
        helpers = (unsigned)ring.nbatches;
    ring.nslots = helpers ? 2 * (size_t)helpers + 2 : 1;
    ring.slots = st_calloc(ring.nslots, sizeof *ring.slots);
    if (!ring.slots)
        return ST_ERR_NOMEM;
    size_t made = 0;
    for (; rc == ST_OK && made < ring.nslots; made++) {
        rc = batch_init(&ring.slots[made], GPKG_BATCH_ROWS, g->layer.ncells);
        ring.slots[made].seq = made;
    }
    if (rc == ST_OK)
        rc = helpers ? write_threaded(w, &ring, helpers) : write_alone(w, &ring);
    for (size_t i = 0; i < ring.nslots; i++)
        batch_free(&ring.slots[i]);
    st_free(ring.slots);
    return rc;
}

/* ---- end of a layer: extent, R-tree ---------------------------------------- */

static st_status store_extent(st_writer *w, gpkg_layer *l)
{
    if (!l->has_extent)
        return ST_OK;
    sqlite3_stmt *s = NULL;
    st_status rc = prepare(w, "UPDATE gpkg_contents SET min_x = ?, min_y = ?, "
                              "max_x = ?, max_y = ? WHERE table_name = ?",
                           &s, "storing the extent");
    if (rc != ST_OK)
        return rc;
    for (int i = 0; i < 4; i++)
        sqlite3_bind_double(s, i + 1, l->extent[i]);
    sqlite3_bind_text(s, 5, l->table, -1, SQLITE_STATIC);
    rc = step_done(w, s, "storing the extent");
    sqlite3_finalize(s);
    return rc;
}

/* Statements of the R-tree index of a layer: the virtual table (then
** filled by st_gpkg_rtree_load with the boxes of the rows written), the triggers of the gpkg_rtree_index extension
** (GeoPackage 1.2, Annex F.3; validate_gpkg checks them as Req 75) and its
** gpkg_extensions row. In each, {R} stands for the quoted R-tree table,
** {T} the quoted feature table, {L} the table name as a string literal
** and {N} the R-tree name inside double quotes (trigger names). */
static const char *const rtree_sql[] = {
    "CREATE VIRTUAL TABLE {R} USING rtree(id, minx, maxx, miny, maxy)",
    "CREATE TRIGGER \"{N}_insert\" AFTER INSERT ON {T} "
    "WHEN (new.\"geom\" NOT NULL AND NOT ST_IsEmpty(NEW.\"geom\")) BEGIN "
    "INSERT OR REPLACE INTO {R} VALUES (NEW.\"fid\", ST_MinX(NEW.\"geom\"), "
    "ST_MaxX(NEW.\"geom\"), ST_MinY(NEW.\"geom\"), ST_MaxY(NEW.\"geom\")); END",
    "CREATE TRIGGER \"{N}_update1\" AFTER UPDATE OF \"geom\" ON {T} "
    "WHEN OLD.\"fid\" = NEW.\"fid\" AND (NEW.\"geom\" NOTNULL AND NOT ST_IsEmpty(NEW.\"geom\")) "
    "BEGIN INSERT OR REPLACE INTO {R} VALUES (NEW.\"fid\", ST_MinX(NEW.\"geom\"), "
    "ST_MaxX(NEW.\"geom\"), ST_MinY(NEW.\"geom\"), ST_MaxY(NEW.\"geom\")); END",
    "CREATE TRIGGER \"{N}_update2\" AFTER UPDATE OF \"geom\" ON {T} "
    "WHEN OLD.\"fid\" = NEW.\"fid\" AND (NEW.\"geom\" ISNULL OR ST_IsEmpty(NEW.\"geom\")) "
    "BEGIN DELETE FROM {R} WHERE id = OLD.\"fid\"; END",
    "CREATE TRIGGER \"{N}_update3\" AFTER UPDATE ON {T} "
    "WHEN OLD.\"fid\" != NEW.\"fid\" AND (NEW.\"geom\" NOTNULL AND NOT ST_IsEmpty(NEW.\"geom\")) "
    "BEGIN DELETE FROM {R} WHERE id = OLD.\"fid\"; "
    "INSERT OR REPLACE INTO {R} VALUES (NEW.\"fid\", ST_MinX(NEW.\"geom\"), "
    "ST_MaxX(NEW.\"geom\"), ST_MinY(NEW.\"geom\"), ST_MaxY(NEW.\"geom\")); END",
    "CREATE TRIGGER \"{N}_update4\" AFTER UPDATE ON {T} "
    "WHEN OLD.\"fid\" != NEW.\"fid\" AND (NEW.\"geom\" ISNULL OR ST_IsEmpty(NEW.\"geom\")) "
    "BEGIN DELETE FROM {R} WHERE id IN (OLD.\"fid\", NEW.\"fid\"); END",
    "CREATE TRIGGER \"{N}_delete\" AFTER DELETE ON {T} "
    "WHEN old.\"geom\" NOT NULL BEGIN DELETE FROM {R} WHERE id = OLD.\"fid\"; END",
    "INSERT INTO gpkg_extensions VALUES ({L}, 'geom', 'gpkg_rtree_index', "
    "'http://www.geopackage.org/spec120/#extension_rtree', 'write-only')",
};

/* Append s with every character c doubled, between c's when 'wrap'. */
static st_status quoted(st_buf *b, const char *s, char c, int wrap)
{
    char q[2] = {c, c};
    st_status rc = wrap ? st_buf_append(b, q, 1) : ST_OK;
    for (const char *p = s; rc == ST_OK && *p; p++)
        rc = st_buf_append(b, *p == c ? q : p, *p == c ? 2 : 1);
    return rc == ST_OK && wrap ? st_buf_append(b, q, 1) : rc;
}

/* Append template t with {R} {T} {L} {N} replaced by subst[0..3]. */
static st_status expand(st_buf *out, const char *t, const char *const subst[4])
{
    static const char keys[] = "RTLN";
    st_status rc = ST_OK;
    while (rc == ST_OK && *t) {
        const char *k = t[0] == '{' && t[1] && t[2] == '}' ? strchr(keys, t[1]) : NULL;
        if (k) {
            rc = st_buf_puts(out, subst[k - keys]);
            t += 3;
        } else {
            rc = st_buf_append(out, t++, 1);
        }
    }
    return rc;
}

static st_status fill_rtree(st_writer *w, gpkg_layer *l, const char *rtree)
{
    char err[512] = "";
    st_status rc = st_gpkg_rtree_load(((gpkg_writer *)w->impl)->db, rtree, l->boxes, l->nboxes,
                                      err, sizeof err);
    if (rc == ST_ERR_NOMEM)
        return st_writer_fail(w, rc, "out of memory");
    return rc == ST_OK ? ST_OK : st_writer_fail(w, rc, "building the R-tree index: %s", err);
}

static st_status build_rtree(st_writer *w, gpkg_layer *l)
{
    st_buf name, part[4], sql;
    st_buf_init(&name, 0);
    st_buf_init(&sql, 0);
    for (int i = 0; i < 4; i++)
        st_buf_init(&part[i], 0);
    st_status rc = st_buf_printf(&name, "rtree_%s_geom", l->table);
    if (rc == ST_OK)
        rc = quoted(&part[0], name.data, '"', 1);
    if (rc == ST_OK)
        rc = quoted(&part[1], l->table, '"', 1);
    if (rc == ST_OK)
        rc = quoted(&part[2], l->table, '\'', 1);
    if (rc == ST_OK)
        rc = quoted(&part[3], name.data, '"', 0);
    const char *subst[4] = {part[0].data, part[1].data, part[2].data, part[3].data};
    for (size_t i = 0; rc == ST_OK && i < sizeof rtree_sql / sizeof rtree_sql[0]; i++) {
        st_buf_clear(&sql);
        rc = expand(&sql, rtree_sql[i], subst);
        if (rc == ST_OK)
            rc = exec(w, sql.data, "building the R-tree index");
        if (rc == ST_OK && i == 0)
            rc = fill_rtree(w, l, name.data);
    }
    st_buf_free(&name);
    st_buf_free(&sql);
    for (int i = 0; i < 4; i++)
        st_buf_free(&part[i]);
    return rc;
}

static st_status gpkg_end(st_writer *w)
{
    gpkg_writer *g = w->impl;
    if (!g->in_layer)
        return ST_OK;
    g->in_layer = 0;
    gpkg_layer *l = &g->layer;
    st_status rc = g->failed ? st_writer_fail(w, ST_ERR_IO,
                                              "the output is unusable after an earlier error")
                             : ST_OK;
    /* Finalise the insert first: the R-tree statements touch its table. */
    sqlite3_finalize(l->insert);
    sqlite3_finalize(l->insert_many);
    l->insert = l->insert_many = NULL;
    if (rc == ST_OK && l->has_geom)
        rc = store_extent(w, l);
    if (rc == ST_OK && l->has_geom)
        rc = build_rtree(w, l);
    layer_free(l);
    return rc;
}

/* ---- finish, discard ------------------------------------------------------- */

static void release(gpkg_writer *g)
{
    layer_free(&g->layer);
    sqlite3_close_v2(g->db);
    st_buf_free(&g->blob);
    st_free(g);
}

static st_status gpkg_finish(st_writer *w)
{
    gpkg_writer *g = w->impl;
    st_status rc = g->in_layer ? gpkg_end(w) : ST_OK;
    if (rc == ST_OK && g->failed)
        rc = st_writer_fail(w, ST_ERR_IO, "the output is unusable after an earlier error");
    if (rc == ST_OK)
        rc = exec(w, "COMMIT", "committing");
    if (rc == ST_OK) {
        layer_free(&g->layer);
        int c = sqlite3_close(g->db);
        if (c != SQLITE_OK)
            rc = sql_error(w, c, "closing the file");
        else
            g->db = NULL;
    }
    release(g);
    w->impl = NULL;
    return rc;
}

/* No rollback: with journal_mode=OFF SQLite cannot undo, and the whole
** temporary file is deleted anyway. */
static void gpkg_discard(st_writer *w)
{
    gpkg_writer *g = w->impl;
    if (g)
        release(g);
    w->impl = NULL;
    remove(w->tmp_path);
    char *journal = st_strdup_printf("%s-journal", w->tmp_path);
    if (journal)
        remove(journal);
    st_free(journal);
}

const st_writer_format st_gpkg_writer_format = {
    "gpkg", gpkg_extensions_list, 1, gpkg_wopen, gpkg_begin, gpkg_write,
    gpkg_end, gpkg_write_rows, gpkg_finish, NULL, gpkg_discard,
};
