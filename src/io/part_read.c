/*
** io/part_read.c -- reading a part (stocktake/part.h) back for `merge`.
**
** Input:   a file written by io/part_write.c; opened read-only through
**          SQLite ("mode=ro"), so it is never changed and nothing appears
**          beside it. Its schema is not trusted (defensive mode, no
**          extensions, untrusted schema).
** Output:  part_info, the layers with their fields and the files loaded at
**          open; features one at a time in bid order; findings and
**          unmapped counts on request.
** Errors:  one diagnostic naming the file for each failure. ST_ERR_IO when
**          it cannot be opened; ST_ERR_FORMAT when it is not an SQLite file,
**          not a GeoPackage, not a part, a part of another format version,
**          truncated (its SQLite header states more pages than there are),
**          or damaged: a table or column missing, a value of the wrong type
**          or out of range, a feature record that does not decode or holds
**          another bid (the bid is named), fewer or more rows than the
**          counts committed with the part.
** Limits:  a value above ST_GPKG_MAX_BLOB bytes is refused by SQLite
**          itself (ST_ERR_LIMIT).
*/
#include <errno.h>
#include <inttypes.h>
#include <math.h>
#include <sqlite3.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>

#include "stocktake/part.h"
#include "ioInt.h"
#include "partInt.h"

struct st_part {
    sqlite3 *db;
    char *path;                 /* owned */
    st_diags *diags;            /* borrowed */
    char **info;                /* 2 * ninfo strings (key, value or NULL), owned */
    size_t ninfo;
    st_part_layer *layers;      /* owned, strings and fields too */
    size_t nlayers;
    st_part_file *files;        /* owned, strings too */
    size_t nfiles;
    sqlite3_stmt *rows;         /* SELECT bid, shared, data ORDER BY bid */
    uint64_t features, seen;    /* committed count, rows returned so far */
    st_status state;            /* of the walk: ST_OK, or its failure */
    int done;
};

/* ---- helpers --------------------------------------------------------------- */

static st_status pfail(st_part *p, st_status code, const char *fmt, ...) ST_PRINTF(3, 4);
static st_status pfail(st_part *p, st_status code, const char *fmt, ...)
{
    st_loc loc = ST_LOC_FILE(p->path);
    va_list ap;
    va_start(ap, fmt);
    st_diags_addv(p->diags, ST_SEV_ERROR, code, &loc, fmt, ap);
    va_end(ap);
    return code;
}

/* An SQLite failure: a file that passed the checks at open and then fails
** a query is damaged (a table or column missing, a bad page). */
static st_status sql_fail(st_part *p, int code, const char *doing)
{
    const char *msg = p->db ? sqlite3_errmsg(p->db) : sqlite3_errstr(code);
    switch (code & 0xff) {
    case SQLITE_NOMEM:
        return ST_ERR_NOMEM;
    case SQLITE_NOTADB:
        return pfail(p, ST_ERR_FORMAT, "not a stocktake part: not an SQLite database");
    case SQLITE_TOOBIG:
        return pfail(p, ST_ERR_LIMIT, "a value is longer than the limit of %zu bytes "
                     "(while %s)", ST_GPKG_MAX_BLOB, doing);
    case SQLITE_CANTOPEN:
    case SQLITE_PERM:
        return pfail(p, ST_ERR_IO, "cannot open the part: %s", msg);
    case SQLITE_IOERR:
        if (code != SQLITE_IOERR_SHORT_READ)
            return pfail(p, ST_ERR_IO, "SQLite error while %s: %s", doing, msg);
        break;
    }
    return pfail(p, ST_ERR_FORMAT, "the part is damaged (%s while %s)", msg, doing);
}

static st_status prepare(st_part *p, const char *sql, sqlite3_stmt **s, const char *doing)
{
    int rc = sqlite3_prepare_v2(p->db, sql, -1, s, NULL);
    return rc == SQLITE_OK ? ST_OK : sql_fail(p, rc, doing);
}

/* Owned copy of a TEXT (or NULL) column; *bad when it has another type. */
static st_status column_str(sqlite3_stmt *s, int i, char **out, int *bad)
{
    *out = NULL;
    int t = sqlite3_column_type(s, i);
    if (t == SQLITE_NULL)
        return ST_OK;
    if (t != SQLITE_TEXT) {
        *bad = 1;
        return ST_OK;
    }
    const char *text = (const char *)sqlite3_column_text(s, i);
    if (!text)
        return ST_ERR_NOMEM;
    *out = st_strndup(text, (size_t)sqlite3_column_bytes(s, i));
    return *out ? ST_OK : ST_ERR_NOMEM;
}

/* An INTEGER column; *bad when it has another type. */
static int64_t column_int(sqlite3_stmt *s, int i, int *bad)
{
    if (sqlite3_column_type(s, i) != SQLITE_INTEGER)
        *bad = 1;
    return sqlite3_column_int64(s, i);
}

/* Not an SQLite file, or one cut short: SQLite reads a short last page as
** zeros and would not notice (io/gpkg_read.c explains the header test). */
static st_status check_file(st_part *p)
{
    struct stat st;
    if (stat(p->path, &st) != 0)
        return pfail(p, ST_ERR_IO, "cannot open the part: %s", strerror(errno));
    if (!S_ISREG(st.st_mode))
        return pfail(p, ST_ERR_IO, "cannot open the part: not a regular file");
    FILE *f = st_fopen_regular(p->path);
    if (!f)
        return pfail(p, ST_ERR_IO, "cannot open the part: %s", st_open_error(errno));
    unsigned char h[100];
    size_t n = fread(h, 1, sizeof h, f);
    fclose(f);
    long long stated = 0;
    switch (st_sqlite_header_check(h, n, (long long)st.st_size, &stated)) {
    case ST_SQLITE_NOT_SQLITE:
        return pfail(p, ST_ERR_FORMAT, "not a stocktake part: not an SQLite database");
    case ST_SQLITE_SHORT_HEADER:
        return pfail(p, ST_ERR_FORMAT, "the part is truncated (%zu bytes)", n);
    case ST_SQLITE_TRUNCATED:
        return pfail(p, ST_ERR_FORMAT, "the part is truncated: its header states %lld "
                     "bytes, the file has %lld", stated, (long long)st.st_size);
    default:
        return ST_OK;
    }
}

static st_status open_db(st_part *p)
{
    char *uri = st_gpkg_uri(p->path, "mode=ro");
    if (!uri)
        return ST_ERR_NOMEM;
    int rc = st_gpkg_open_readonly(uri, (int)ST_GPKG_MAX_BLOB, &p->db);
    st_free(uri);
    if (rc != SQLITE_OK)
        return sql_fail(p, rc, "opening the part");
    return ST_OK;
}

/* One integer from a query of one row. */
static st_status query_int(st_part *p, const char *sql, long long *out, const char *doing)
{
    sqlite3_stmt *s = NULL;
    st_status rc = prepare(p, sql, &s, doing);
    if (rc != ST_OK)
        return rc;
    int step = sqlite3_step(s);
    if (step == SQLITE_ROW)
        *out = sqlite3_column_int64(s, 0);
    else
        rc = sql_fail(p, step == SQLITE_DONE ? SQLITE_ERROR : step, doing);
    sqlite3_finalize(s);
    return rc;
}

/* ---- what open loads ------------------------------------------------------- */

static st_status load_info(st_part *p)
{
    sqlite3_stmt *s = NULL;
    st_status rc = prepare(p, "SELECT key, value FROM part_info ORDER BY id", &s,
                           "reading part_info");
    int step = SQLITE_DONE, bad = 0;
    size_t cap = 0;
    while (rc == ST_OK && (step = sqlite3_step(s)) == SQLITE_ROW) {
        if (p->ninfo == cap) {
            size_t ncap = cap ? 2 * cap : 16;
            char **grown = st_realloc(p->info, 2 * ncap * sizeof *grown);
            if (!grown) {
                rc = ST_ERR_NOMEM;
                break;
            }
            p->info = grown;
            cap = ncap;
        }
        char **kv = &p->info[2 * p->ninfo];
        kv[0] = kv[1] = NULL;
        p->ninfo++;
        rc = column_str(s, 0, &kv[0], &bad);
        if (rc == ST_OK)
            rc = column_str(s, 1, &kv[1], &bad);
        if (rc == ST_OK && (bad || !kv[0]))
            rc = pfail(p, ST_ERR_FORMAT, "the part is damaged: part_info row %zu is not "
                       "a text key and value", p->ninfo);
    }
    if (rc == ST_OK && step != SQLITE_DONE)
        rc = sql_fail(p, step, "reading part_info");
    sqlite3_finalize(s);
    return rc;
}

/* A committed count from part_info. */
static st_status info_count(st_part *p, const char *key, uint64_t *out)
{
    const char *v = st_part_info(p, key);
    char *end = NULL;
    errno = 0;
    *out = v && *v >= '0' && *v <= '9' ? strtoull(v, &end, 10) : 0;
    if (!end || *end || errno)
        return pfail(p, ST_ERR_FORMAT, "the part is damaged or unfinished: part_info "
                     "has no valid '%s'", key);
    return ST_OK;
}

/* Is this a part of our version? Checked before anything else is read. */
static st_status check_part(st_part *p)
{
    long long app = 0, tables = 0;
    st_status rc = query_int(p, "PRAGMA application_id", &app, "reading the header");
    if (rc == ST_OK && app != 0x47504B47)
        rc = pfail(p, ST_ERR_FORMAT, "not a stocktake part: not a GeoPackage "
                   "(application id 0x%08llx)", (unsigned long long)app & 0xffffffffULL);
    if (rc == ST_OK)
        rc = query_int(p, "SELECT count(*) FROM sqlite_master WHERE type = 'table' "
                          "AND name = 'part_info'", &tables, "reading the schema");
    if (rc == ST_OK && tables != 1)
        rc = pfail(p, ST_ERR_FORMAT, "not a stocktake part: a GeoPackage without a "
                   "part_info table");
    if (rc == ST_OK)
        rc = load_info(p);
    if (rc != ST_OK)
        return rc;
    const char *v = st_part_info(p, PART_KEY_FORMAT);
    char want[16];
    snprintf(want, sizeof want, "%d", ST_PART_FORMAT_VERSION);
    if (!v)
        return pfail(p, ST_ERR_FORMAT, "not a stocktake part: part_info has no '%s'",
                     PART_KEY_FORMAT);
    if (strcmp(v, want) != 0)
        return pfail(p, ST_ERR_FORMAT, "part format '%.20s' cannot be read: this "
                     "stocktake reads part format %s (write the parts again with it)",
                     v, want);
    return info_count(p, PART_KEY_FEATURES, &p->features);
}

static st_status load_fields(st_part *p)
{
    sqlite3_stmt *s = NULL;
    st_status rc = prepare(p, "SELECT layer, name, type, width, decimals FROM part_fields "
                              "ORDER BY id", &s, "reading part_fields");
    int step = SQLITE_DONE;
    while (rc == ST_OK && (step = sqlite3_step(s)) == SQLITE_ROW) {
        int bad = 0;
        int64_t layer = column_int(s, 0, &bad), type = column_int(s, 2, &bad);
        int64_t width = column_int(s, 3, &bad), decimals = column_int(s, 4, &bad);
        int tname = sqlite3_column_type(s, 1);   /* before any conversion */
        const char *name = (const char *)sqlite3_column_text(s, 1);
        if (tname != SQLITE_TEXT || !name || bad || layer < 1 ||
            (uint64_t)layer > p->nlayers || type < 0 || type > ST_FIELD_JSON ||
            width < INT32_MIN || width > INT32_MAX || decimals < INT32_MIN ||
            decimals > INT32_MAX) {
            rc = pfail(p, ST_ERR_FORMAT, "the part is damaged: a row of part_fields is "
                       "out of range");
            break;
        }
        st_fields *f = &p->layers[layer - 1].fields;
        uint32_t before = f->count, at;
        rc = st_fields_add(f, name, (st_field_type)type, (int)width, (int)decimals, &at);
        if (rc == ST_OK && f->count == before)
            rc = pfail(p, ST_ERR_FORMAT, "the part is damaged: layer %" PRId64 " has "
                       "field '%s' twice", layer, name);
    }
    if (rc == ST_OK && step != SQLITE_DONE)
        rc = sql_fail(p, step, "reading part_fields");
    sqlite3_finalize(s);
    return rc;
}

static st_status load_layers(st_part *p)
{
    long long n = 0;
    st_status rc = query_int(p, "SELECT count(*) FROM part_layers", &n, "reading part_layers");
    if (rc != ST_OK || n == 0)
        return rc;
    p->layers = st_calloc((size_t)n, sizeof *p->layers);
    if (!p->layers)
        return ST_ERR_NOMEM;
    sqlite3_stmt *s = NULL;
    rc = prepare(p, "SELECT id, name, path, format, crs, read FROM part_layers ORDER BY id",
                 &s, "reading part_layers");
    int step = SQLITE_DONE;
    while (rc == ST_OK && (step = sqlite3_step(s)) == SQLITE_ROW) {
        int bad = 0;
        if (p->nlayers == (size_t)n || column_int(s, 0, &bad) != (int64_t)p->nlayers + 1) {
            rc = pfail(p, ST_ERR_FORMAT, "the part is damaged: part_layers is not "
                       "numbered 1, 2, 3...");
            break;
        }
        st_part_layer *l = &p->layers[p->nlayers++];
        st_fields_init(&l->fields);
        char *text[4] = {NULL, NULL, NULL, NULL};
        for (int i = 0; rc == ST_OK && i < 4; i++)
            rc = column_str(s, 1 + i, &text[i], &bad);
        l->name = text[0];
        l->path = text[1];
        l->format = text[2];
        l->crs = text[3];
        l->read = (uint64_t)column_int(s, 5, &bad);
        if (rc == ST_OK && bad)
            rc = pfail(p, ST_ERR_FORMAT, "the part is damaged: layer %zu of part_layers "
                       "has a value of the wrong type", p->nlayers);
    }
    if (rc == ST_OK && step != SQLITE_DONE)
        rc = sql_fail(p, step, "reading part_layers");
    sqlite3_finalize(s);
    return rc == ST_OK ? load_fields(p) : rc;
}

static st_status load_files(st_part *p)
{
    long long n = 0;
    st_status rc = query_int(p, "SELECT count(*) FROM part_files", &n, "reading part_files");
    if (rc != ST_OK || n == 0)
        return rc;
    p->files = st_calloc((size_t)n, sizeof *p->files);
    if (!p->files)
        return ST_ERR_NOMEM;
    sqlite3_stmt *s = NULL;
    rc = prepare(p, "SELECT role, path, sha256, bytes FROM part_files ORDER BY id", &s,
                 "reading part_files");
    int step = SQLITE_DONE;
    while (rc == ST_OK && p->nfiles < (size_t)n && (step = sqlite3_step(s)) == SQLITE_ROW) {
        int bad = 0;
        st_part_file *f = &p->files[p->nfiles++];
        char *role = NULL, *path = NULL;
        rc = column_str(s, 0, &role, &bad);
        f->role = role;
        if (rc == ST_OK)
            rc = column_str(s, 1, &path, &bad);
        f->path = path;
        int tsha = sqlite3_column_type(s, 2);   /* before any conversion */
        const char *sha = (const char *)sqlite3_column_text(s, 2);
        size_t len = (size_t)sqlite3_column_bytes(s, 2);
        f->bytes = (uint64_t)column_int(s, 3, &bad);
        if (rc == ST_OK && (bad || !sha || tsha != SQLITE_TEXT || len >= sizeof f->sha256))
            rc = pfail(p, ST_ERR_FORMAT, "the part is damaged: file %zu of part_files "
                       "has a value of the wrong type", p->nfiles);
        if (rc == ST_OK)
            memcpy(f->sha256, sha, len + 1);
    }
    if (rc == ST_OK && step != SQLITE_DONE && step != SQLITE_ROW)
        rc = sql_fail(p, step, "reading part_files");
    sqlite3_finalize(s);
    return rc;
}

/* ---- open, close, accessors ------------------------------------------------ */

st_status st_part_open(const char *path, st_diags *diags, st_part **out)
{
    *out = NULL;
    st_part *p = st_calloc(1, sizeof *p);
    if (!p)
        return ST_ERR_NOMEM;
    p->diags = diags;
    p->path = st_strdup(path);
    st_status rc = p->path ? check_file(p) : ST_ERR_NOMEM;
    if (rc == ST_OK)
        rc = open_db(p);
    if (rc == ST_OK)
        rc = check_part(p);
    if (rc == ST_OK)
        rc = load_layers(p);
    if (rc == ST_OK)
        rc = load_files(p);
    if (rc == ST_OK)
        rc = prepare(p, "SELECT bid, shared, data FROM part_features ORDER BY bid",
                     &p->rows, "reading part_features");
    if (rc != ST_OK) {
        st_part_close(p);
        return rc;
    }
    *out = p;
    return ST_OK;
}

void st_part_close(st_part *p)
{
    if (!p)
        return;
    sqlite3_finalize(p->rows);
    sqlite3_close(p->db);
    for (size_t i = 0; i < 2 * p->ninfo; i++)
        st_free(p->info[i]);
    st_free(p->info);
    for (size_t i = 0; i < p->nlayers; i++) {
        st_free((char *)p->layers[i].name);
        st_free((char *)p->layers[i].path);
        st_free((char *)p->layers[i].format);
        st_free((char *)p->layers[i].crs);
        st_fields_free(&p->layers[i].fields);
    }
    st_free(p->layers);
    for (size_t i = 0; i < p->nfiles; i++) {
        st_free((char *)p->files[i].role);
        st_free((char *)p->files[i].path);
    }
    st_free(p->files);
    st_free(p->path);
    st_free(p);
}

const char *st_part_path(const st_part *p)
{
    return p->path;
}

const char *st_part_info(const st_part *p, const char *key)
{
    for (size_t i = 0; i < p->ninfo; i++)
        if (strcmp(p->info[2 * i], key) == 0)
            return p->info[2 * i + 1];
    return NULL;
}

const st_part_layer *st_part_layers(const st_part *p, size_t *n)
{
    *n = p->nlayers;
    return p->layers;
}

const st_part_file *st_part_files(const st_part *p, size_t *n)
{
    *n = p->nfiles;
    return p->files;
}

/* ---- features, findings, unmapped ------------------------------------------ */

/* Decode the current row of p->rows into *out. */
static st_status take_feature(st_part *p, st_strtab *strings, st_feature **out, int *shared)
{
    int bad = 0;
    int64_t bid = column_int(p->rows, 0, &bad), sh = column_int(p->rows, 1, &bad);
    if (bad || bid < 0 || (sh != 0 && sh != 1) ||
        sqlite3_column_type(p->rows, 2) != SQLITE_BLOB)
        return pfail(p, ST_ERR_FORMAT, "bid %" PRId64 ": the part is damaged (a row of "
                     "part_features has a value of the wrong type)", bid);
    const void *data = sqlite3_column_blob(p->rows, 2);
    size_t n = (size_t)sqlite3_column_bytes(p->rows, 2);
    if (!data && n)
        return ST_ERR_NOMEM;
    st_status rc = st_feature_decode(data, n, strings, out);
    if (rc == ST_ERR_NOMEM)
        return rc;
    if (rc == ST_ERR_FORMAT)
        return pfail(p, rc, "bid %" PRId64 ": the stored feature is damaged (%zu bytes "
                     "that do not decode)", bid, n);
    if (rc == ST_ERR_LIMIT)
        return pfail(p, rc, "bid %" PRId64 ": the stored feature exceeds a limit "
                     "(its values or the table of rule names)", bid);
    if (rc != ST_OK)
        return pfail(p, rc, "bid %" PRId64 ": the feature names a rule but no string "
                     "table was given", bid);
    if ((*out)->bid != (uint64_t)bid) {
        rc = pfail(p, ST_ERR_FORMAT, "bid %" PRId64 ": the stored feature is damaged "
                   "(it holds bid %" PRIu64 ")", bid, (*out)->bid);
        st_feature_free(*out);
        *out = NULL;
        return rc;
    }
    *shared = (int)sh;
    return ST_OK;
}

st_status st_part_next_feature(st_part *p, st_strtab *strings, st_feature **out, int *shared)
{
    *out = NULL;
    *shared = 0;
    if (p->state != ST_OK || p->done)
        return p->state;
    st_status rc = ST_OK;
    int step = sqlite3_step(p->rows);
    if (step == SQLITE_ROW) {
        rc = take_feature(p, strings, out, shared);
        if (rc == ST_OK)
            p->seen++;
    } else if (step == SQLITE_DONE) {
        p->done = 1;
        if (p->seen != p->features)
            rc = pfail(p, ST_ERR_FORMAT, "the part is damaged: it holds %" PRIu64
                       " features, %" PRIu64 " were committed", p->seen, p->features);
    } else {
        rc = sql_fail(p, step, "reading part_features");
    }
    if (rc != ST_OK)
        p->state = rc;   /* the row is consumed: the walk cannot resume */
    return rc;
}

/* Append a finding with its message copied exactly (st_findings_add
** would format it into a bounded buffer). */
static st_status push_finding(st_findings *f, const st_finding *g, const char *msg, size_t n)
{
    if (f->count == f->cap) {
        size_t cap = f->cap ? 2 * f->cap : 16;
        st_finding *items = st_realloc(f->items, cap * sizeof *items);
        if (!items)
            return ST_ERR_NOMEM;
        f->items = items;
        f->cap = cap;
    }
    char *copy = st_strndup(msg, n);
    if (!copy)
        return ST_ERR_NOMEM;
    f->items[f->count] = *g;
    f->items[f->count++].message = copy;
    return ST_OK;
}

/* A REAL column, NaN for NULL; *bad for any other type. */
static double column_coord(sqlite3_stmt *s, int i, int *bad)
{
    int t = sqlite3_column_type(s, i);
    if (t == SQLITE_NULL)
        return NAN;
    if (t != SQLITE_FLOAT && t != SQLITE_INTEGER)
        *bad = 1;
    return sqlite3_column_double(s, i);
}

/* One row of part_findings into 'into'. */
static st_status take_finding(st_part *p, sqlite3_stmt *s, st_strtab *strings,
                              st_findings *into)
{
    int bad = 0;
    st_finding g;
    g.bid = (uint64_t)column_int(s, 0, &bad);
    int64_t sev = column_int(s, 2, &bad);
    g.severity = (st_severity)sev;
    g.x = column_coord(s, 4, &bad);
    g.y = column_coord(s, 5, &bad);
    g.message = NULL;
    int tcode = sqlite3_column_type(s, 1), tmsg = sqlite3_column_type(s, 3);
    const char *code = (const char *)sqlite3_column_text(s, 1);
    size_t ncode = (size_t)sqlite3_column_bytes(s, 1);
    const char *msg = (const char *)sqlite3_column_text(s, 3);
    size_t nmsg = (size_t)sqlite3_column_bytes(s, 3);
    if (bad || sev < ST_SEV_NOTE || sev > ST_SEV_ERROR || !code || !msg ||
        tcode != SQLITE_TEXT || tmsg != SQLITE_TEXT)
        return pfail(p, ST_ERR_FORMAT, "the part is damaged: finding %zu of part_findings "
                     "has a value of the wrong type or out of range", into->count + 1);
    uint32_t id;
    st_status rc = st_strtab_intern(strings, code, ncode, &id, NULL);
    if (rc == ST_ERR_LIMIT)
        return pfail(p, rc, "finding %zu: too many finding codes for the string table",
                     into->count + 1);
    if (rc != ST_OK)
        return rc;
    g.code = st_strtab_get(strings, id, NULL);
    return push_finding(into, &g, msg, nmsg);
}

st_status st_part_read_findings(st_part *p, st_strtab *strings, st_findings *dst)
{
    uint64_t expect = 0;
    st_status rc = info_count(p, PART_KEY_FINDINGS, &expect);
    sqlite3_stmt *s = NULL;
    if (rc == ST_OK)
        rc = prepare(p, "SELECT bid, code, severity, message, x, y FROM part_findings "
                        "ORDER BY seq", &s, "reading part_findings");
    st_findings got;
    st_findings_init(&got);
    int step = SQLITE_DONE;
    while (rc == ST_OK && (step = sqlite3_step(s)) == SQLITE_ROW)
        rc = take_finding(p, s, strings, &got);
    if (rc == ST_OK && step != SQLITE_DONE)
        rc = sql_fail(p, step, "reading part_findings");
    sqlite3_finalize(s);
    if (rc == ST_OK && got.count != expect)
        rc = pfail(p, ST_ERR_FORMAT, "the part is damaged: it holds %zu findings, %"
                   PRIu64 " were committed", got.count, expect);
    if (rc == ST_OK)
        rc = st_findings_move(dst, &got);   /* all or nothing */
    st_findings_free(&got);
    return rc;
}

st_status st_part_read_unmapped(st_part *p,
                                st_status (*add)(void *ud, const char *field,
                                                 const char *value, uint64_t count),
                                void *ud, uint64_t *dropped)
{
    uint64_t expect = 0, rows = 0;
    st_status rc = info_count(p, PART_KEY_UNMAPPED, &expect);
    if (rc == ST_OK)
        rc = info_count(p, PART_KEY_DROPPED, dropped);
    sqlite3_stmt *s = NULL;
    if (rc == ST_OK)
        rc = prepare(p, "SELECT field, value, count FROM part_unmapped ORDER BY id", &s,
                     "reading part_unmapped");
    int step = SQLITE_DONE;
    while (rc == ST_OK && (step = sqlite3_step(s)) == SQLITE_ROW) {
        int bad = 0;
        uint64_t count = (uint64_t)column_int(s, 2, &bad);
        int tf = sqlite3_column_type(s, 0), tv = sqlite3_column_type(s, 1);
        const char *field = (const char *)sqlite3_column_text(s, 0);
        const char *value = (const char *)sqlite3_column_text(s, 1);
        if (bad || (tf != SQLITE_TEXT && tf != SQLITE_NULL) ||
            (tv != SQLITE_TEXT && tv != SQLITE_NULL)) {
            rc = pfail(p, ST_ERR_FORMAT, "the part is damaged: row %" PRIu64 " of "
                       "part_unmapped has a value of the wrong type", rows + 1);
            break;
        }
        if ((tf == SQLITE_TEXT && !field) || (tv == SQLITE_TEXT && !value))
            rc = ST_ERR_NOMEM;
        else
            rc = add(ud, field, value, count);
        rows++;
    }
    if (rc == ST_OK && step != SQLITE_DONE)
        rc = sql_fail(p, step, "reading part_unmapped");
    sqlite3_finalize(s);
    if (rc == ST_OK && rows != expect)
        rc = pfail(p, ST_ERR_FORMAT, "the part is damaged: it holds %" PRIu64 " unmapped "
                   "counts, %" PRIu64 " were committed", rows, expect);
    return rc;
}
