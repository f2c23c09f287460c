/*
** io/part_write.c -- writing a part (stocktake/part.h): the buildings a
** tile owns, their findings and the run's context, for `merge`.
**
** Input:   the calls of part.h in any order between open and commit;
**          features and findings borrowed.
** Output:  a GeoPackage 1.2 (application_id "GPKG", user_version 10200)
**          with gpkg_spatial_ref_sys (its three mandatory rows),
**          gpkg_contents, an empty gpkg_geometry_columns (GDAL lists no
**          table without it), and the attribute tables listed in
**          io/partInt.h. Everything goes to "dir/.NAME.tmp-PID.gpkg" in one
**          transaction; commit records the row counts, commits, and renames
**          the file into place. Without a commit close removes it.
** Errors:  every failure adds one diagnostic naming the part's final path
**          (ST_ERR_NOMEM aside): ST_ERR_IO for SQLite or rename failures
**          (the writer then refuses further work), ST_ERR_USAGE for a bid
**          written twice, a reserved or repeated info key, an inconsistent
**          feature, or a call after commit; ST_ERR_LIMIT for a bid above
**          INT64_MAX or a record above ST_GPKG_MAX_BLOB bytes.
** Speed:   prepared statements, journal_mode=OFF and synchronous=OFF, safe
**          for the reason io/gpkg_write.c gives: only a committed, complete
**          file is ever renamed into place.
*/
#include <inttypes.h>
#include <sqlite3.h>
#include <stdio.h>
#include <string.h>
#include <unistd.h>

#include "stocktake/part.h"
#include "ioInt.h"
#include "partInt.h"

struct st_part_writer {
    sqlite3 *db;
    char *path;                 /* final path, owned */
    char *tmp_path;             /* owned */
    st_diags *diags;            /* borrowed */
    sqlite3_stmt *feature;      /* INSERT INTO part_features */
    sqlite3_stmt *finding;      /* INSERT INTO part_findings */
    st_buf record;              /* reused for every feature */
    uint64_t nfeatures, nfindings, nunmapped, dropped;
    int64_t nlayers;
    int failed;                 /* an SQLite call failed: file unusable */
    int committed;
};

/* The part's own tables, after the GeoPackage core of io/gpkg_core.c
** (gpkg_geometry_columns stays empty, but GDAL finds no layer at all
** without it). */
static const char schema_sql[] =
    "CREATE TABLE part_info (id INTEGER PRIMARY KEY, key TEXT NOT NULL UNIQUE, value TEXT);"
    "CREATE TABLE part_layers (id INTEGER PRIMARY KEY, name TEXT, path TEXT, "
    "format TEXT, crs TEXT, read INTEGER NOT NULL);"
    "CREATE TABLE part_fields (id INTEGER PRIMARY KEY, layer INTEGER NOT NULL, "
    "name TEXT NOT NULL, type INTEGER NOT NULL, width INTEGER NOT NULL, "
    "decimals INTEGER NOT NULL);"
    "CREATE TABLE part_files (id INTEGER PRIMARY KEY, role TEXT, path TEXT, "
    "sha256 TEXT NOT NULL, bytes INTEGER NOT NULL);"
    "CREATE TABLE part_features (bid INTEGER PRIMARY KEY, shared INTEGER NOT NULL, "
    "data BLOB NOT NULL);"
    "CREATE TABLE part_findings (seq INTEGER PRIMARY KEY, bid INTEGER NOT NULL, "
    "code TEXT NOT NULL, severity INTEGER NOT NULL, message TEXT NOT NULL, "
    "x REAL, y REAL);"
    "CREATE TABLE part_unmapped (id INTEGER PRIMARY KEY, field TEXT, value TEXT, "
    "count INTEGER NOT NULL);";

static const char *const part_tables[] = {
    "part_info", "part_layers", "part_fields", "part_files",
    "part_features", "part_findings", "part_unmapped"};

/* ---- SQLite helpers ------------------------------------------------------ */

static st_status wfail(st_part_writer *w, st_status code, const char *fmt, ...)
    ST_PRINTF(3, 4);
static st_status wfail(st_part_writer *w, st_status code, const char *fmt, ...)
{
    st_loc loc = ST_LOC_FILE(w->path);
    va_list ap;
    va_start(ap, fmt);
    st_diags_addv(w->diags, ST_SEV_ERROR, code, &loc, fmt, ap);
    va_end(ap);
    return code;
}

static st_status sql_error(st_part_writer *w, int code, const char *doing)
{
    w->failed = 1;
    if ((code & 0xff) == SQLITE_NOMEM)
        return ST_ERR_NOMEM;
    return wfail(w, ST_ERR_IO, "SQLite error while %s: %s", doing,
                 w->db ? sqlite3_errmsg(w->db) : sqlite3_errstr(code));
}

static st_status exec(st_part_writer *w, const char *sql, const char *doing)
{
    int rc = sqlite3_exec(w->db, sql, NULL, NULL, NULL);
    return rc == SQLITE_OK ? ST_OK : sql_error(w, rc, doing);
}

static st_status prepare(st_part_writer *w, const char *sql, sqlite3_stmt **s,
                         const char *doing)
{
    int rc = sqlite3_prepare_v2(w->db, sql, -1, s, NULL);
    return rc == SQLITE_OK ? ST_OK : sql_error(w, rc, doing);
}

/* Step a statement that returns no row, then reset it and clear its
** bindings. A constraint failure is returned as SQLITE_CONSTRAINT in
** *constraint (when not NULL) instead of failing the writer. */
static st_status step_done(st_part_writer *w, sqlite3_stmt *s, const char *doing,
                           int *constraint)
{
    int rc = sqlite3_step(s);
    sqlite3_reset(s);
    sqlite3_clear_bindings(s);
    if (rc == SQLITE_DONE)
        return ST_OK;
    if (constraint && (rc & 0xff) == SQLITE_CONSTRAINT) {
        *constraint = 1;
        return ST_ERR_USAGE;
    }
    return sql_error(w, rc, doing);
}

/* ST_OK when the writer may go on. */
static st_status usable(st_part_writer *w)
{
    if (w->committed)
        return wfail(w, ST_ERR_USAGE, "the part is already committed");
    if (w->failed)
        return wfail(w, ST_ERR_IO, "the part is unusable after an earlier error");
    return ST_OK;
}

static void bind_text(sqlite3_stmt *s, int i, const char *t)
{
    if (t)
        sqlite3_bind_text(s, i, t, -1, SQLITE_STATIC);
    else
        sqlite3_bind_null(s, i);
}

/* ---- open ---------------------------------------------------------------- */

/* gpkg_contents rows (all 'attributes'), EPSG:4326 and the format key. */
static st_status fill_header(st_part_writer *w)
{
    char when[32], stamp[40];
    st_now_iso8601(when);   /* SOURCE_DATE_EPOCH when set: reproducible */
    snprintf(stamp, sizeof stamp, "%.*s.000Z", (int)strlen(when) - 1, when);
    sqlite3_stmt *s = NULL;
    st_status rc = prepare(w, "INSERT INTO gpkg_spatial_ref_sys VALUES ('WGS 84 geodetic', "
                              "4326, 'EPSG', 4326, ?, 'longitude/latitude coordinates in "
                              "decimal degrees on the WGS 84 spheroid')", &s, "adding EPSG:4326");
    if (rc == ST_OK) {
        sqlite3_bind_text(s, 1, st_gpkg_wgs84_wkt, -1, SQLITE_STATIC);
        rc = step_done(w, s, "adding EPSG:4326", NULL);
    }
    sqlite3_finalize(s);
    s = NULL;
    if (rc == ST_OK)
        rc = prepare(w, "INSERT INTO gpkg_contents (table_name, data_type, identifier, "
                        "description, last_change) VALUES (?1, 'attributes', ?1, ?2, ?3)",
                     &s, "adding to gpkg_contents");
    for (size_t i = 0; rc == ST_OK && i < sizeof part_tables / sizeof part_tables[0]; i++) {
        sqlite3_bind_text(s, 1, part_tables[i], -1, SQLITE_STATIC);
        sqlite3_bind_text(s, 2, "stocktake part", -1, SQLITE_STATIC);
        sqlite3_bind_text(s, 3, stamp, -1, SQLITE_TRANSIENT);
        rc = step_done(w, s, "adding to gpkg_contents", NULL);
    }
    sqlite3_finalize(s);
    s = NULL;
    if (rc == ST_OK)
        rc = prepare(w, "INSERT INTO part_info (key, value) VALUES ('" PART_KEY_FORMAT
                        "', ?)", &s, "recording the part format");
    if (rc == ST_OK) {
        sqlite3_bind_int(s, 1, ST_PART_FORMAT_VERSION);
        rc = step_done(w, s, "recording the part format", NULL);
    }
    sqlite3_finalize(s);
    return rc;
}

static st_status create_file(st_part_writer *w)
{
    remove(w->tmp_path);   /* a stale temporary file of ours, if any */
    char *uri = st_gpkg_uri(w->tmp_path, "mode=rwc");
    if (!uri)
        return ST_ERR_NOMEM;
    int rc = sqlite3_open_v2(uri, &w->db,
                             SQLITE_OPEN_READWRITE | SQLITE_OPEN_CREATE | SQLITE_OPEN_URI, NULL);
    st_free(uri);
    if (rc != SQLITE_OK)
        return sql_error(w, rc, "creating the part");
    st_status st = exec(w, "PRAGMA application_id = 1196444487;"   /* "GPKG" */
                           "PRAGMA user_version = 10200;"          /* GeoPackage 1.2.0 */
                           "PRAGMA journal_mode = OFF;"
                           "PRAGMA synchronous = OFF;"
                           "PRAGMA locking_mode = EXCLUSIVE;"
                           "PRAGMA cache_size = -32768;",
                        "setting up the part");
    if (st == ST_OK)
        st = exec(w, "BEGIN", "starting the transaction");
    if (st == ST_OK)
        st = exec(w, st_gpkg_core_sql, "creating the part's tables");
    if (st == ST_OK)
        st = exec(w, schema_sql, "creating the part's tables");
    if (st == ST_OK)
        st = fill_header(w);
    if (st == ST_OK)
        st = prepare(w, "INSERT INTO part_features (bid, shared, data) VALUES (?, ?, ?)",
                     &w->feature, "preparing the feature insert");
    if (st == ST_OK)
        st = prepare(w, "INSERT INTO part_findings (bid, code, severity, message, x, y) "
                        "VALUES (?, ?, ?, ?, ?, ?)", &w->finding, "preparing the finding insert");
    return st;
}

st_status st_part_writer_open(const char *path, st_diags *diags, st_part_writer **out)
{
    *out = NULL;
    st_part_writer *w = st_calloc(1, sizeof *w);
    if (!w)
        return ST_ERR_NOMEM;
    w->diags = diags;
    st_buf_init(&w->record, ST_GPKG_MAX_BLOB);
    w->path = st_strdup(path);
    w->tmp_path = st_io_temp_name(path);
    st_status rc = w->path && w->tmp_path ? create_file(w) : ST_ERR_NOMEM;
    if (rc != ST_OK) {
        st_part_writer_close(w);
        return rc;
    }
    *out = w;
    return ST_OK;
}

/* ---- tables -------------------------------------------------------------- */

st_status st_part_write_info(st_part_writer *w, const char *const *kv, size_t n)
{
    st_status rc = usable(w);
    for (size_t i = 0; rc == ST_OK && i < n; i++)
        if (!kv[2 * i] || strncmp(kv[2 * i], PART_KEY_PREFIX, strlen(PART_KEY_PREFIX)) == 0)
            rc = wfail(w, ST_ERR_USAGE, "info key '%s' is reserved for the part itself",
                       kv[2 * i] ? kv[2 * i] : "(null)");
    sqlite3_stmt *s = NULL;
    if (rc == ST_OK)
        rc = prepare(w, "INSERT INTO part_info (key, value) VALUES (?, ?)", &s,
                     "preparing the info insert");
    for (size_t i = 0; rc == ST_OK && i < n; i++) {
        int dup = 0;
        bind_text(s, 1, kv[2 * i]);
        bind_text(s, 2, kv[2 * i + 1]);
        rc = step_done(w, s, "writing part_info", &dup);
        if (dup)
            rc = wfail(w, ST_ERR_USAGE, "info key '%s' is written twice", kv[2 * i]);
    }
    sqlite3_finalize(s);
    return rc;
}

static st_status write_fields(st_part_writer *w, sqlite3_stmt *s, const st_fields *f)
{
    st_status rc = ST_OK;
    for (uint32_t i = 0; rc == ST_OK && i < f->count; i++) {
        const st_field *fd = &f->items[i];
        sqlite3_bind_int64(s, 1, w->nlayers);
        bind_text(s, 2, fd->name ? fd->name : "");
        sqlite3_bind_int(s, 3, (int)fd->type);
        sqlite3_bind_int(s, 4, fd->width);
        sqlite3_bind_int(s, 5, fd->decimals);
        rc = step_done(w, s, "writing part_fields", NULL);
    }
    return rc;
}

st_status st_part_write_layers(st_part_writer *w, const st_part_layer *layers, size_t n)
{
    st_status rc = usable(w);
    sqlite3_stmt *l = NULL, *f = NULL;
    if (rc == ST_OK)
        rc = prepare(w, "INSERT INTO part_layers (id, name, path, format, crs, read) "
                        "VALUES (?, ?, ?, ?, ?, ?)", &l, "preparing the layer insert");
    if (rc == ST_OK)
        rc = prepare(w, "INSERT INTO part_fields (layer, name, type, width, decimals) "
                        "VALUES (?, ?, ?, ?, ?)", &f, "preparing the field insert");
    for (size_t i = 0; rc == ST_OK && i < n; i++) {
        w->nlayers++;
        sqlite3_bind_int64(l, 1, w->nlayers);
        bind_text(l, 2, layers[i].name);
        bind_text(l, 3, layers[i].path);
        bind_text(l, 4, layers[i].format);
        bind_text(l, 5, layers[i].crs);
        sqlite3_bind_int64(l, 6, (int64_t)layers[i].read);
        rc = step_done(w, l, "writing part_layers", NULL);
        if (rc == ST_OK)
            rc = write_fields(w, f, &layers[i].fields);
    }
    sqlite3_finalize(l);
    sqlite3_finalize(f);
    return rc;
}

st_status st_part_write_files(st_part_writer *w, const st_part_file *files, size_t n)
{
    st_status rc = usable(w);
    sqlite3_stmt *s = NULL;
    if (rc == ST_OK)
        rc = prepare(w, "INSERT INTO part_files (role, path, sha256, bytes) "
                        "VALUES (?, ?, ?, ?)", &s, "preparing the file insert");
    for (size_t i = 0; rc == ST_OK && i < n; i++) {
        bind_text(s, 1, files[i].role);
        bind_text(s, 2, files[i].path);
        sqlite3_bind_text(s, 3, files[i].sha256, (int)strnlen(files[i].sha256, 64),
                          SQLITE_STATIC);
        sqlite3_bind_int64(s, 4, (int64_t)files[i].bytes);
        rc = step_done(w, s, "writing part_files", NULL);
    }
    sqlite3_finalize(s);
    return rc;
}

st_status st_part_write_feature(st_part_writer *w, const st_feature *f, int shared)
{
    st_status rc = usable(w);
    if (rc != ST_OK)
        return rc;
    if (f->bid > INT64_MAX)
        return wfail(w, ST_ERR_LIMIT, "bid %" PRIu64 " is above the largest a part "
                     "holds (%" PRId64 ")", f->bid, INT64_MAX);
    st_buf_clear(&w->record);
    rc = st_feature_encode(f, &w->record);
    if (rc == ST_ERR_USAGE)
        return wfail(w, rc, "bid %" PRIu64 ": the feature's geometry offsets, status, "
                     "district or provenance are inconsistent", f->bid);
    if (rc == ST_ERR_LIMIT)
        return wfail(w, rc, "bid %" PRIu64 ": the feature takes more than %zu bytes",
                     f->bid, ST_GPKG_MAX_BLOB);
    if (rc != ST_OK)
        return rc;
    int dup = 0;
    sqlite3_bind_int64(w->feature, 1, (int64_t)f->bid);
    sqlite3_bind_int(w->feature, 2, shared ? 1 : 0);
    sqlite3_bind_blob(w->feature, 3, w->record.data, (int)w->record.len, SQLITE_STATIC);
    rc = step_done(w, w->feature, "writing part_features", &dup);
    if (dup)
        return wfail(w, rc, "bid %" PRIu64 " is written twice", f->bid);
    if (rc == ST_OK)
        w->nfeatures++;
    return rc;
}

st_status st_part_write_findings(st_part_writer *w, const st_findings *f)
{
    st_status rc = usable(w);
    for (size_t i = 0; rc == ST_OK && i < f->count; i++) {
        const st_finding *g = &f->items[i];
        sqlite3_stmt *s = w->finding;
        sqlite3_bind_int64(s, 1, (int64_t)g->bid);
        bind_text(s, 2, g->code ? g->code : "");
        sqlite3_bind_int(s, 3, (int)g->severity);
        bind_text(s, 4, g->message ? g->message : "");
        if (g->x == g->x)
            sqlite3_bind_double(s, 5, g->x);
        if (g->y == g->y)
            sqlite3_bind_double(s, 6, g->y);   /* NaN stays NULL (cleared) */
        rc = step_done(w, s, "writing part_findings", NULL);
        if (rc == ST_OK)
            w->nfindings++;
    }
    return rc;
}

st_status st_part_write_unmapped(st_part_writer *w, const char *const *field,
                                 const char *const *value, const uint64_t *count,
                                 size_t n, uint64_t dropped)
{
    st_status rc = usable(w);
    sqlite3_stmt *s = NULL;
    if (rc == ST_OK)
        rc = prepare(w, "INSERT INTO part_unmapped (field, value, count) VALUES (?, ?, ?)",
                     &s, "preparing the unmapped insert");
    for (size_t i = 0; rc == ST_OK && i < n; i++) {
        bind_text(s, 1, field[i]);
        bind_text(s, 2, value[i]);
        sqlite3_bind_int64(s, 3, (int64_t)count[i]);
        rc = step_done(w, s, "writing part_unmapped", NULL);
        if (rc == ST_OK)
            w->nunmapped++;
    }
    sqlite3_finalize(s);
    if (rc == ST_OK)
        w->dropped += dropped;
    return rc;
}

/* ---- commit, close --------------------------------------------------------- */

/* The row counts the reader checks, so a part that lost rows is refused. */
static st_status write_counts(st_part_writer *w)
{
    const char *keys[] = {PART_KEY_FEATURES, PART_KEY_FINDINGS, PART_KEY_UNMAPPED,
                          PART_KEY_DROPPED};
    uint64_t values[] = {w->nfeatures, w->nfindings, w->nunmapped, w->dropped};
    sqlite3_stmt *s = NULL;
    st_status rc = prepare(w, "INSERT INTO part_info (key, value) VALUES (?, ?)", &s,
                           "recording the counts");
    for (size_t i = 0; rc == ST_OK && i < sizeof keys / sizeof keys[0]; i++) {
        char text[24];
        snprintf(text, sizeof text, "%" PRIu64, values[i]);
        sqlite3_bind_text(s, 1, keys[i], -1, SQLITE_STATIC);
        sqlite3_bind_text(s, 2, text, -1, SQLITE_TRANSIENT);
        rc = step_done(w, s, "recording the counts", NULL);
    }
    sqlite3_finalize(s);
    return rc;
}

/* Finalize the statements and close the database (also after failures). */
static st_status close_db(st_part_writer *w)
{
    sqlite3_finalize(w->feature);
    sqlite3_finalize(w->finding);
    w->feature = w->finding = NULL;
    int rc = w->db ? sqlite3_close(w->db) : SQLITE_OK;
    w->db = NULL;
    return rc == SQLITE_OK ? ST_OK : wfail(w, ST_ERR_IO, "cannot close the part: %s",
                                           sqlite3_errstr(rc));
}

st_status st_part_writer_commit(st_part_writer *w)
{
    st_status rc = usable(w);
    if (rc == ST_OK)
        rc = write_counts(w);
    if (rc == ST_OK)
        rc = exec(w, "COMMIT", "committing");
    if (rc == ST_OK)
        rc = close_db(w);
    if (rc == ST_OK && rename(w->tmp_path, w->path) != 0)
        rc = wfail(w, ST_ERR_IO, "cannot rename the finished part into place");
    if (rc != ST_OK) {
        w->failed = 1;
        return rc;
    }
    w->committed = 1;
    return ST_OK;
}

void st_part_writer_close(st_part_writer *w)
{
    if (!w)
        return;
    (void)close_db(w);
    if (!w->committed && w->tmp_path)
        remove(w->tmp_path);
    st_buf_free(&w->record);
    st_free(w->path);
    st_free(w->tmp_path);
    st_free(w);
}
