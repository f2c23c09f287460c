/*
** explain/explain.c -- find one building in a run's output and sort its
** columns into own columns, schema fields and source attributes.
**
** Input:   OUT.gpkg, or OUT.geojson / OUT.geojsonl with its siblings
**          (st_inventory_sibling_path), and a bid.
** Output:  an st_explanation (explain.h).
** Errors:  one diagnostic naming the file: ST_ERR_IO (cannot open),
**          ST_ERR_FORMAT (not a stocktake output), ST_ERR_USAGE (no such
**          bid), ST_ERR_LIMIT (a value above ST_EXPLAIN_MAX_VALUE).
** Limits:  ST_EXPLAIN_MAX_FINDINGS findings kept; the rest only counted.
**
** Why SQLite directly for a GeoPackage, not our GeoPackage reader: the
** reader decodes every geometry blob and copies every value of every row
** until the bid turns up, while one prepared `SELECT ... WHERE bid = ?`
** lets SQLite skip rows without decoding anything -- on a national layer
** of millions of buildings that is the difference between a pause and a
** wait -- and the same query serves the findings layer. The database is
** opened read-only and immutable (nothing is ever written beside it), in
** SQLite's defensive mode with an untrusted schema, like the reader does.
** A GeoJSON output has no index to use: it is streamed through our own
** reader (io.h), which keeps memory flat, until the bid is found.
*/
#include <errno.h>
#include <sqlite3.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>

#include "stocktake/explain.h"
#include "stocktake/inventory.h"
#include "stocktake/io.h"
#include "stocktake/rules.h"

/* Our own leading columns of buildings and set_aside (inventory.h). A
** layout without schema fields has no triple to mark where the source
** attributes begin: then the own columns are the longest prefix of these. */
static const char *const own_names[] = {
    "bid", "layer", "source_id", "status", "reason", "duplicate_of",
    "area_m2", "perimeter_m", "flags", "district"};

/* A row as read: column names and values, both owned. */
typedef struct row {
    st_explain_pair *cols;
    size_t n, cap;
} row;

static void row_free(row *r)
{
    for (size_t i = 0; i < r->n; i++) {
        st_free(r->cols[i].name);
        st_free(r->cols[i].value);
    }
    st_free(r->cols);
    memset(r, 0, sizeof *r);
}

/* 1 if 's' is a number as JSON writes one (-12, 3.5, 1e-3): such values
** are rendered as numbers, anything else as text. */
static int is_number(const char *s)
{
    if (!s)
        return 0;
    const char *p = s + (*s == '-');
    if (*p < '0' || *p > '9' || (p[0] == '0' && p[1] >= '0' && p[1] <= '9'))
        return 0;
    while (*p >= '0' && *p <= '9')
        p++;
    if (*p == '.') {
        if (*++p < '0' || *p > '9')
            return 0;
        while (*p >= '0' && *p <= '9')
            p++;
    }
    if (*p == 'e' || *p == 'E') {
        p += p[1] == '+' || p[1] == '-' ? 2 : 1;
        if (*p < '0' || *p > '9')
            return 0;
        while (*p >= '0' && *p <= '9')
            p++;
    }
    return *p == '\0';
}

/* Append one column (name and value borrowed and copied; value may be NULL). */
static st_status row_add(row *r, const char *name, const char *value, size_t vlen, int numeric)
{
    if (r->n == r->cap) {
        size_t cap = r->cap ? 2 * r->cap : 32;
        st_explain_pair *a = st_realloc(r->cols, cap * sizeof *a);
        if (!a)
            return ST_ERR_NOMEM;
        r->cols = a;
        r->cap = cap;
    }
    st_explain_pair *p = &r->cols[r->n];
    p->name = st_strdup(name);
    p->value = value ? st_utf8_sanitize(value, vlen) : NULL;
    if (!p->name || (value && !p->value)) {
        st_free(p->name);
        st_free(p->value);
        return ST_ERR_NOMEM;
    }
    p->numeric = numeric && is_number(p->value);
    r->n++;
    return ST_OK;
}

/* ---- sorting the columns ------------------------------------------------ */

/* 1 if columns i, i+1, i+2 are X, X_from, X_rule. */
static int is_triple(const row *r, size_t i)
{
    if (i + 2 >= r->n)
        return 0;
    const char *x = r->cols[i].name;
    size_t k = strlen(x);
    const char *from = r->cols[i + 1].name, *rule = r->cols[i + 2].name;
    return !strncmp(from, x, k) && !strcmp(from + k, "_from") &&
           !strncmp(rule, x, k) && !strcmp(rule + k, "_rule");
}

static int is_own_name(const char *name)
{
    for (size_t i = 0; i < sizeof own_names / sizeof own_names[0]; i++)
        if (!strcmp(name, own_names[i]))
            return 1;
    return 0;
}

/* Move column i's strings out of the row (the row keeps NULLs). */
static st_explain_pair take(row *r, size_t i)
{
    st_explain_pair p = r->cols[i];
    r->cols[i].name = NULL;
    r->cols[i].value = NULL;
    return p;
}

static st_status sort_columns(row *r, st_explanation *e)
{
    size_t first = 0;
    while (first < r->n && !is_triple(r, first))
        first++;
    size_t nown = first;
    if (first == r->n) {            /* no schema fields */
        nown = 0;
        while (nown < r->n && is_own_name(r->cols[nown].name))
            nown++;
    }
    size_t end = nown;
    while (first < r->n && is_triple(r, end))
        end += 3;
    e->own = st_calloc(nown + 1, sizeof *e->own);
    e->fields = st_calloc((end - nown) / 3 + 1, sizeof *e->fields);
    e->source = st_calloc(r->n - end + 1, sizeof *e->source);
    if (!e->own || !e->fields || !e->source)
        return ST_ERR_NOMEM;
    for (size_t i = 0; i < nown; i++)
        e->own[e->nown++] = take(r, i);
    for (size_t i = nown; i < end; i += 3) {
        st_explain_field *f = &e->fields[e->nfields++];
        st_explain_pair v = take(r, i), from = take(r, i + 1), rule = take(r, i + 2);
        f->name = v.name;
        f->value = v.value;
        f->from = from.value;
        f->rule = rule.value;
        st_free(from.name);
        st_free(rule.name);
    }
    for (size_t i = end; i < r->n; i++)
        if (r->cols[i].value && r->cols[i].value[0])
            e->source[e->nsource++] = take(r, i);
    for (size_t i = 0; i < e->nown; i++) {
        const char *name = e->own[i].name;
        if (!strcmp(name, "status"))
            e->status = e->own[i].value;
        else if (!strcmp(name, "reason"))
            e->reason = e->own[i].value;
        else if (!strcmp(name, "duplicate_of"))
            e->duplicate_of = e->own[i].value;
    }
    return ST_OK;
}

static st_status add_finding(st_explanation *e, const char *code, const char *sev,
                             const char *msg)
{
    e->findings_total++;
    if (e->nfindings >= ST_EXPLAIN_MAX_FINDINGS)
        return ST_OK;
    if (!e->findings) {
        e->findings = st_calloc(ST_EXPLAIN_MAX_FINDINGS, sizeof *e->findings);
        if (!e->findings)
            return ST_ERR_NOMEM;
    }
    st_explain_finding *g = &e->findings[e->nfindings];
    g->code = code ? st_strdup(code) : NULL;
    g->severity = sev ? st_strdup(sev) : NULL;
    g->message = msg ? st_utf8_sanitize(msg, strlen(msg)) : NULL;
    e->nfindings++;
    if ((code && !g->code) || (sev && !g->severity) || (msg && !g->message))
        return ST_ERR_NOMEM;
    return ST_OK;
}

/* ---- GeoPackage --------------------------------------------------------- */

typedef struct gpkg {
    const char *path;
    st_diags *diags;
    sqlite3 *db;
    st_buf sql;
} gpkg;

static st_status gpkg_fail(gpkg *g, st_status code, const char *fmt, const char *arg)
{
    st_loc loc = ST_LOC_FILE(g->path);
    return st_diags_add(g->diags, ST_SEV_ERROR, code, &loc, fmt, arg);
}

static st_status sql_error(gpkg *g, int rc, const char *doing)
{
    if ((rc & 0xff) == SQLITE_NOMEM)
        return ST_ERR_NOMEM;
    if ((rc & 0xff) == SQLITE_NOTADB)
        return gpkg_fail(g, ST_ERR_FORMAT, "not a stocktake output: %s",
                         "not an SQLite database");
    if ((rc & 0xff) == SQLITE_TOOBIG)
        return gpkg_fail(g, ST_ERR_LIMIT, "a value is too long (while %s)", doing);
    st_loc loc = ST_LOC_FILE(g->path);
    return st_diags_add(g->diags, ST_SEV_ERROR, (rc & 0xff) == SQLITE_CORRUPT ? ST_ERR_FORMAT
                                                                             : ST_ERR_IO,
                        &loc, "SQLite error while %s: %s", doing, sqlite3_errmsg(g->db));
}


static st_status gpkg_open(gpkg *g)
{
    char *uri = st_gpkg_uri(g->path, "immutable=1");
    if (!uri)
        return ST_ERR_NOMEM;
    int rc = st_gpkg_open_readonly(uri, (int)ST_EXPLAIN_MAX_VALUE, &g->db);
    st_free(uri);
    if (rc != SQLITE_OK)
        return sql_error(g, rc, "opening the file");
    return ST_OK;
}

static st_status quote_ident(st_buf *b, const char *name)
{
    st_status rc = st_buf_puts(b, "\"");
    for (const char *p = name; rc == ST_OK && *p; p++)
        rc = st_buf_append(b, *p == '"' ? "\"\"" : p, *p == '"' ? 2 : 1);
    return rc == ST_OK ? st_buf_puts(b, "\"") : rc;
}

/* 1 if the GeoPackage lists table 'name' in gpkg_contents, 0 if not. */
static st_status gpkg_has_table(gpkg *g, const char *name, int *has)
{
    sqlite3_stmt *s = NULL;
    *has = 0;
    int rc = sqlite3_prepare_v2(g->db, "SELECT 1 FROM gpkg_contents WHERE table_name = ?",
                                -1, &s, NULL);
    if (rc != SQLITE_OK) {
        if (rc == SQLITE_ERROR && strstr(sqlite3_errmsg(g->db), "no such table"))
            return gpkg_fail(g, ST_ERR_FORMAT, "not a stocktake output: %s",
                             "not a GeoPackage (no gpkg_contents table)");
        return sql_error(g, rc, "reading gpkg_contents");
    }
    sqlite3_bind_text(s, 1, name, -1, SQLITE_STATIC);
    rc = sqlite3_step(s);
    *has = rc == SQLITE_ROW;
    st_status st = rc == SQLITE_ROW || rc == SQLITE_DONE ? ST_OK
                                                         : sql_error(g, rc, "reading gpkg_contents");
    sqlite3_finalize(s);
    return st;
}

/* SELECT of every column of 'table' but its integer key and its geometry,
** into g->sql. */
static st_status gpkg_select(gpkg *g, const char *table)
{
    st_buf_clear(&g->sql);
    st_status rc = st_buf_puts(&g->sql, "SELECT name, pk FROM pragma_table_info(?) "
                                        "WHERE name NOT IN (SELECT column_name FROM "
                                        "gpkg_geometry_columns WHERE table_name = ?1) "
                                        "ORDER BY cid");
    if (rc != ST_OK)
        return rc;
    sqlite3_stmt *s = NULL;
    int q = sqlite3_prepare_v2(g->db, g->sql.data, -1, &s, NULL);
    if (q != SQLITE_OK)
        return sql_error(g, q, "reading the columns");
    sqlite3_bind_text(s, 1, table, -1, SQLITE_STATIC);
    st_buf cols;
    st_buf_init(&cols, 0);
    int n = 0;
    while (rc == ST_OK && (q = sqlite3_step(s)) == SQLITE_ROW) {
        if (sqlite3_column_int(s, 1))
            continue;       /* the integer primary key (fid) */
        if (n++)
            rc = st_buf_puts(&cols, ", ");
        if (rc == ST_OK)
            rc = quote_ident(&cols, (const char *)sqlite3_column_text(s, 0));
    }
    if (rc == ST_OK && q != SQLITE_DONE)
        rc = sql_error(g, q, "reading the columns");
    sqlite3_finalize(s);
    st_buf_clear(&g->sql);
    if (rc == ST_OK)
        rc = st_buf_printf(&g->sql, "SELECT %s FROM ", n ? cols.data : "NULL");
    if (rc == ST_OK)
        rc = quote_ident(&g->sql, table);
    if (rc == ST_OK)
        rc = st_buf_puts(&g->sql, " WHERE bid = ?");
    st_buf_free(&cols);
    return rc;
}

/* The row of 'table' whose bid is 'bid' into 'r'; *found 0 when none. */
static st_status gpkg_find(gpkg *g, const char *table, uint64_t bid, row *r, int *found)
{
    *found = 0;
    st_status rc = gpkg_select(g, table);
    if (rc != ST_OK)
        return rc;
    sqlite3_stmt *s = NULL;
    int q = sqlite3_prepare_v2(g->db, g->sql.data, -1, &s, NULL);
    if (q != SQLITE_OK) {
        if (strstr(sqlite3_errmsg(g->db), "no such column"))
            return gpkg_fail(g, ST_ERR_FORMAT, "not a stocktake output: layer %s has no "
                             "bid column", table);
        return sql_error(g, q, "looking up the bid");
    }
    sqlite3_bind_int64(s, 1, (sqlite3_int64)bid);
    q = sqlite3_step(s);
    if (q == SQLITE_ROW) {
        *found = 1;
        for (int c = 0; rc == ST_OK && c < sqlite3_column_count(s); c++) {
            int type = sqlite3_column_type(s, c);
            const char *v = (const char *)sqlite3_column_text(s, c);
            size_t n = (size_t)sqlite3_column_bytes(s, c);
            if (type == SQLITE_BLOB)
                v = "(binary)", n = 8;
            rc = row_add(r, sqlite3_column_name(s, c), type == SQLITE_NULL ? NULL : v, n,
                         type == SQLITE_INTEGER || type == SQLITE_FLOAT);
        }
    } else if (q != SQLITE_DONE)
        rc = sql_error(g, q, "looking up the bid");
    sqlite3_finalize(s);
    return rc;
}

static st_status gpkg_findings(gpkg *g, st_explanation *e)
{
    sqlite3_stmt *s = NULL;
    int q = sqlite3_prepare_v2(g->db, "SELECT code, severity, message FROM findings "
                                      "WHERE bid = ? ORDER BY rowid", -1, &s, NULL);
    if (q != SQLITE_OK)
        return sql_error(g, q, "reading the findings");
    sqlite3_bind_int64(s, 1, (sqlite3_int64)e->bid);
    st_status rc = ST_OK;
    while (rc == ST_OK && (q = sqlite3_step(s)) == SQLITE_ROW)
        rc = add_finding(e, (const char *)sqlite3_column_text(s, 0),
                         (const char *)sqlite3_column_text(s, 1),
                         (const char *)sqlite3_column_text(s, 2));
    if (rc == ST_OK && q != SQLITE_DONE)
        rc = sql_error(g, q, "reading the findings");
    sqlite3_finalize(s);
    return rc;
}

/* The largest bid of the output, for the message about a missing one. */
static long long gpkg_max_bid(gpkg *g)
{
    sqlite3_stmt *s = NULL;
    long long m = 0;
    if (sqlite3_prepare_v2(g->db, "SELECT max(m) FROM (SELECT max(bid) AS m FROM buildings "
                                  "UNION ALL SELECT max(bid) FROM set_aside)",
                           -1, &s, NULL) == SQLITE_OK && sqlite3_step(s) == SQLITE_ROW)
        m = sqlite3_column_int64(s, 0);
    sqlite3_finalize(s);
    return m;
}

static st_status no_such_bid(st_diags *d, const char *path, uint64_t bid, long long max)
{
    st_loc loc = ST_LOC_FILE(path);
    if (max > 0)
        return st_diags_add(d, ST_SEV_ERROR, ST_ERR_USAGE, &loc,
                            "no building %llu in this output: neither in buildings nor in "
                            "set_aside (bids run from 1 to %lld)",
                            (unsigned long long)bid, max);
    return st_diags_add(d, ST_SEV_ERROR, ST_ERR_USAGE, &loc,
                        "no building %llu in this output: it holds no buildings",
                        (unsigned long long)bid);
}

static st_status load_gpkg(const char *path, st_explanation *e, st_diags *diags, row *r)
{
    gpkg g = {path, diags, NULL, {0}};
    st_buf_init(&g.sql, 0);
    st_status rc = gpkg_open(&g);
    int has_b = 0, has_s = 0, has_f = 0, found = 0;
    if (rc == ST_OK)
        rc = gpkg_has_table(&g, "buildings", &has_b);
    if (rc == ST_OK && has_b)
        rc = gpkg_has_table(&g, "set_aside", &has_s);
    if (rc == ST_OK && has_s)
        rc = gpkg_has_table(&g, "findings", &has_f);
    if (rc == ST_OK && !(has_b && has_s && has_f))
        rc = gpkg_fail(&g, ST_ERR_FORMAT, "not a stocktake output: no %s layer",
                       !has_b ? "buildings" : !has_s ? "set_aside" : "findings");
    if (rc == ST_OK)
        rc = gpkg_find(&g, "buildings", e->bid, r, &found);
    if (rc == ST_OK && !found) {
        rc = gpkg_find(&g, "set_aside", e->bid, r, &found);
        e->set_aside = found;
    }
    if (rc == ST_OK && !found)
        rc = no_such_bid(diags, path, e->bid, gpkg_max_bid(&g));
    if (rc == ST_OK)
        rc = gpkg_findings(&g, e);
    sqlite3_close(g.db);
    st_buf_free(&g.sql);
    return rc;
}

/* ---- GeoJSON ------------------------------------------------------------ */

/* Stream 'path' until a feature's bid is 'bid' (into 'r' when r != NULL),
** or, for the findings layer (r == NULL), collect every finding of 'bid'.
** *max_bid gets the largest bid seen. */
static st_status scan_layer(const char *path, uint64_t bid, st_diags *diags, row *r,
                            st_explanation *e, int *found, uint64_t *max_bid)
{
    st_reader *rd = NULL;
    st_read_options ro = ST_READ_OPTIONS_DEFAULT;
    st_status rc = st_reader_open(path, &ro, diags, &rd);
    for (uint64_t k = 0; rc == ST_OK && !*found; k++) {
        st_feature *f = NULL;
        rc = st_reader_next(rd, &f);
        if (rc != ST_OK || !f)
            break;
        const st_fields *fl = st_reader_fields(rd);
        int32_t b = st_fields_find(fl, "bid");
        const char *v = b >= 0 ? st_feature_value(f, (uint32_t)b) : NULL;
        if (b < 0) {
            st_loc loc = ST_LOC_FEATURE(path, (long long)k);
            rc = st_diags_add(diags, ST_SEV_ERROR, ST_ERR_FORMAT, &loc,
                              "not a stocktake output: the feature has no bid");
        }
        uint64_t got = v ? strtoull(v, NULL, 10) : 0;
        if (got > *max_bid)
            *max_bid = got;
        if (rc == ST_OK && v && got == bid && r) {
            *found = 1;
            for (uint32_t i = 0; rc == ST_OK && i < fl->count; i++) {
                const char *x = st_feature_value(f, i);
                size_t n = x ? strlen(x) : 0;
                if (n > ST_EXPLAIN_MAX_VALUE) {
                    st_loc loc = ST_LOC_FEATURE(path, (long long)k);
                    rc = st_diags_add(diags, ST_SEV_ERROR, ST_ERR_LIMIT, &loc,
                                      "value of %s is longer than the limit of %zu bytes",
                                      fl->items[i].name, ST_EXPLAIN_MAX_VALUE);
                } else
                    rc = row_add(r, fl->items[i].name, x, n,
                                 fl->items[i].type == ST_FIELD_INTEGER ||
                                     fl->items[i].type == ST_FIELD_REAL);
            }
        } else if (rc == ST_OK && v && got == bid) {
            int32_t c = st_fields_find(fl, "code"), s = st_fields_find(fl, "severity"),
                    m = st_fields_find(fl, "message");
            rc = add_finding(e, c >= 0 ? st_feature_value(f, (uint32_t)c) : NULL,
                             s >= 0 ? st_feature_value(f, (uint32_t)s) : NULL,
                             m >= 0 ? st_feature_value(f, (uint32_t)m) : NULL);
        }
        st_feature_free(f);
    }
    st_reader_close(rd);
    return rc;
}

/* The sibling 'sib' of output 'path' must exist. */
static st_status need_file(const char *path, const char *sib, st_diags *diags)
{
    struct stat st;
    if (stat(sib, &st) == 0)
        return ST_OK;
    const char *slash = strrchr(sib, '/');
    st_loc loc = ST_LOC_FILE(path);
    return st_diags_add(diags, ST_SEV_ERROR, ST_ERR_FORMAT, &loc,
                        "not a stocktake output: no %s beside it", slash ? slash + 1 : sib);
}

static st_status load_geojson(const char *path, st_explanation *e, st_diags *diags, row *r)
{
    char *aside = st_inventory_sibling_path(path, "set_aside");
    char *finds = st_inventory_sibling_path(path, "findings");
    st_status rc = aside && finds ? ST_OK : ST_ERR_NOMEM;
    if (rc == ST_OK)
        rc = need_file(path, aside, diags);
    if (rc == ST_OK)
        rc = need_file(path, finds, diags);
    int found = 0, none = 0;
    uint64_t max_bid = 0;
    if (rc == ST_OK)
        rc = scan_layer(path, e->bid, diags, r, e, &found, &max_bid);
    if (rc == ST_OK && !found) {
        rc = scan_layer(aside, e->bid, diags, r, e, &found, &max_bid);
        e->set_aside = found;
    }
    if (rc == ST_OK && !found)
        rc = no_such_bid(diags, path, e->bid, (long long)max_bid);
    if (rc == ST_OK)
        rc = scan_layer(finds, e->bid, diags, NULL, e, &none, &max_bid);
    st_free(aside);
    st_free(finds);
    return rc;
}

/* ---- the rule line ----------------------------------------------------- */

st_status st_explain_rule_text(const char *rule, char **out)
{
    *out = NULL;
    const char *colon = rule ? strrchr(rule, ':') : NULL;
    if (!colon || colon == rule || !colon[1])
        return ST_OK;
    char *end = NULL;
    unsigned long line = strtoul(colon + 1, &end, 10);
    if (*end || line == 0)
        return ST_OK;
    char *file = st_strndup(rule, (size_t)(colon - rule));
    if (!file)
        return ST_ERR_NOMEM;
    FILE *fp = fopen(file, "rb");
    st_free(file);
    if (!fp)
        return ST_OK;
    struct stat st;
    char *text = NULL;
    size_t n = 0;
    st_status rc = ST_OK;
    if (fstat(fileno(fp), &st) == 0 && S_ISREG(st.st_mode) &&
        (unsigned long long)st.st_size <= ST_RULES_MAX_FILE_BYTES) {
        text = st_malloc((size_t)st.st_size + 1);
        if (!text)
            rc = ST_ERR_NOMEM;
        else
            n = fread(text, 1, (size_t)st.st_size, fp);
    }
    fclose(fp);
    if (!text)
        return rc;
    const char *p = text, *stop = text + n;
    for (unsigned long k = 1; k < line && p < stop; k++) {
        const char *nl = memchr(p, '\n', (size_t)(stop - p));
        p = nl ? nl + 1 : stop;
    }
    if (p < stop) {
        const char *nl = memchr(p, '\n', (size_t)(stop - p));
        size_t len = (size_t)((nl ? nl : stop) - p);
        while (len && (*p == ' ' || *p == '\t'))
            p++, len--;
        while (len && (p[len - 1] == ' ' || p[len - 1] == '\t' || p[len - 1] == '\r'))
            len--;
        if (len > ST_EXPLAIN_MAX_RULE_LINE)
            len = ST_EXPLAIN_MAX_RULE_LINE;
        *out = st_utf8_sanitize(p, len);
        if (!*out)
            rc = ST_ERR_NOMEM;
    }
    st_free(text);
    return rc;
}

/* ---- loading ------------------------------------------------------------ */

static int is_geojson_name(const char *path)
{
    static const char *const ext[] = {".geojson", ".json", ".geojsonl", ".geojsons", ".ndjson"};
    for (size_t i = 0; i < sizeof ext / sizeof ext[0]; i++)
        if (st_str_ends_with_ci(path, ext[i]))
            return 1;
    return 0;
}

static st_status check_file(const char *path, st_diags *diags)
{
    struct stat st;
    st_loc loc = ST_LOC_FILE(path);
    if (stat(path, &st) != 0)
        return st_diags_add(diags, ST_SEV_ERROR, ST_ERR_IO, &loc, "cannot open: %s",
                            strerror(errno));
    if (!S_ISREG(st.st_mode))
        return st_diags_add(diags, ST_SEV_ERROR, ST_ERR_IO, &loc,
                            "cannot open: not a regular file");
    return ST_OK;
}

st_status st_explain_load(const char *path, uint64_t bid, st_diags *diags,
                          st_explanation **out)
{
    *out = NULL;
    st_status rc = check_file(path, diags);
    if (rc != ST_OK)
        return rc;
    st_explanation *e = st_calloc(1, sizeof *e);
    if (!e)
        return ST_ERR_NOMEM;
    e->bid = bid;
    e->path = st_strdup(path);
    row r = {NULL, 0, 0};
    rc = e->path ? ST_OK : ST_ERR_NOMEM;
    if (rc == ST_OK)
        rc = is_geojson_name(path) ? load_geojson(path, e, diags, &r)
                                   : load_gpkg(path, e, diags, &r);
    if (rc == ST_OK)
        rc = sort_columns(&r, e);
    for (size_t i = 0; rc == ST_OK && i < e->nfields; i++)
        rc = st_explain_rule_text(e->fields[i].rule, &e->fields[i].rule_text);
    row_free(&r);
    if (rc != ST_OK) {
        if (rc == ST_ERR_NOMEM)
            st_diags_add(diags, ST_SEV_ERROR, rc, NULL, "out of memory");
        st_explanation_free(e);
        return rc;
    }
    *out = e;
    return ST_OK;
}

static void free_pairs(st_explain_pair *p, size_t n)
{
    for (size_t i = 0; i < n; i++) {
        st_free(p[i].name);
        st_free(p[i].value);
    }
    st_free(p);
}

void st_explanation_free(st_explanation *e)
{
    if (!e)
        return;
    free_pairs(e->own, e->nown);
    free_pairs(e->source, e->nsource);
    for (size_t i = 0; i < e->nfields; i++) {
        st_free(e->fields[i].name);
        st_free(e->fields[i].value);
        st_free(e->fields[i].from);
        st_free(e->fields[i].rule);
        st_free(e->fields[i].rule_text);
    }
    st_free(e->fields);
    for (size_t i = 0; i < e->nfindings; i++) {
        st_free(e->findings[i].code);
        st_free(e->findings[i].severity);
        st_free(e->findings[i].message);
    }
    st_free(e->findings);
    st_free(e->path);
    st_free(e);
}
