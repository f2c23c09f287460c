/*
** io/csv_read.c -- a small CSV table read whole, row by row, with libcsv,
** keeping the line each row ends on for "file:line" messages.
**
** Input:   a file of at most 'max_bytes' bytes.
** Output:  the caller's row callback, once per row.
** Errors:  see csvread.h.
** Limits:  ST_CSV_MAX_COLUMNS cells a row, ST_CSV_MAX_CELL bytes a cell.
**
** The file is fed to libcsv one line at a time, so the line number is
** known when a row ends (a quoted cell may hold line breaks: the row is
** then reported at the line it ends on).
*/
#include <errno.h>
#include <stdio.h>
#include <string.h>

#include <csv.h>

#include "stocktake/csvread.h"

typedef struct reader {
    const char *path;
    st_diags *diags;
    st_csv_row_fn row;
    void *ud;
    long line;
    char *cells[ST_CSV_MAX_COLUMNS];
    size_t ncells;
    st_status rc;               /* first failure; later callbacks do nothing */
} reader;

static void drop_cells(reader *r)
{
    for (size_t i = 0; i < r->ncells; i++)
        st_free(r->cells[i]);
    r->ncells = 0;
}

static void on_cell(void *s, size_t len, void *ud)
{
    reader *r = ud;
    if (r->rc != ST_OK)
        return;
    st_loc loc = ST_LOC_LINE(r->path, r->line, 0, 0);
    if (r->ncells == ST_CSV_MAX_COLUMNS)
        r->rc = st_diags_add(r->diags, ST_SEV_ERROR, ST_ERR_LIMIT, &loc,
                             "more than %d columns", ST_CSV_MAX_COLUMNS);
    else if (len > ST_CSV_MAX_CELL)
        r->rc = st_diags_add(r->diags, ST_SEV_ERROR, ST_ERR_LIMIT, &loc,
                             "a cell longer than %d bytes", ST_CSV_MAX_CELL);
    else if (st_utf8_valid_prefix(s ? s : "", s ? len : 0) != (s ? len : 0))
        r->rc = st_diags_add(r->diags, ST_SEV_ERROR, ST_ERR_FORMAT, &loc, "not UTF-8 text");
    else if (!(r->cells[r->ncells] = st_strndup(s ? s : "", s ? len : 0)))
        r->rc = ST_ERR_NOMEM;
    else
        r->ncells++;
}

static void on_row(int c, void *ud)
{
    (void)c;
    reader *r = ud;
    if (r->rc == ST_OK)
        r->rc = r->row(r->ud, r->line, r->cells, r->ncells);
    drop_cells(r);
}

static st_status read_file(reader *r, size_t max_bytes, char **text, size_t *len)
{
    *text = NULL;
    st_loc loc = ST_LOC_FILE(r->path);
    FILE *fp = fopen(r->path, "rb");
    if (!fp)
        return st_diags_add(r->diags, ST_SEV_ERROR, ST_ERR_IO, &loc, "cannot open: %s",
                            strerror(errno));
    st_buf b;
    st_buf_init(&b, max_bytes);
    char chunk[65536];
    size_t n;
    st_status rc = ST_OK;
    while (rc == ST_OK && (n = fread(chunk, 1, sizeof chunk, fp)) > 0)
        rc = st_buf_append(&b, chunk, n);
    if (rc == ST_OK && ferror(fp))
        rc = st_diags_add(r->diags, ST_SEV_ERROR, ST_ERR_IO, &loc, "read error");
    else if (rc == ST_ERR_LIMIT)
        st_diags_add(r->diags, ST_SEV_ERROR, rc, &loc, "larger than %zu bytes", max_bytes);
    fclose(fp);
    if (rc != ST_OK) {
        st_buf_free(&b);
        return rc;
    }
    *len = b.len;
    *text = st_buf_take(&b);
    return *text ? ST_OK : ST_ERR_NOMEM;
}

st_status st_csv_read(const char *path, size_t max_bytes, st_csv_row_fn row, void *ud,
                      st_diags *diags)
{
    reader r;
    memset(&r, 0, sizeof r);
    r.path = path;
    r.diags = diags;
    r.row = row;
    r.ud = ud;
    char *text = NULL;
    size_t len = 0;
    st_status rc = read_file(&r, max_bytes, &text, &len);
    if (rc != ST_OK)
        return rc;
    struct csv_parser p;
    if (csv_init(&p, CSV_STRICT | CSV_STRICT_FINI) != 0) {
        st_free(text);
        return ST_ERR_NOMEM;
    }
    csv_set_realloc_func(&p, st_realloc);
    csv_set_free_func(&p, st_free);
    size_t at = len >= 3 && !memcmp(text, "\xEF\xBB\xBF", 3) ? 3 : 0;
    while (at < len && r.rc == ST_OK) {
        const char *nl = memchr(text + at, '\n', len - at);
        size_t n = nl ? (size_t)(nl - (text + at)) + 1 : len - at;
        r.line++;
        if (csv_parse(&p, text + at, n, on_cell, on_row, &r) != n && r.rc == ST_OK) {
            int e = csv_error(&p);
            st_loc loc = ST_LOC_LINE(path, r.line, 0, 0);
            r.rc = e == CSV_ENOMEM ? ST_ERR_NOMEM
                 : st_diags_add(diags, ST_SEV_ERROR, ST_ERR_FORMAT, &loc, "bad CSV: %s",
                                csv_strerror(e));
        }
        at += n;
    }
    if (r.rc == ST_OK && csv_fini(&p, on_cell, on_row, &r) != 0 && r.rc == ST_OK) {
        st_loc loc = ST_LOC_LINE(path, r.line, 0, 0);
        r.rc = st_diags_add(diags, ST_SEV_ERROR, ST_ERR_FORMAT, &loc,
                            "bad CSV: a quoted cell is not closed");
    }
    drop_cells(&r);
    csv_free(&p);
    st_free(text);
    return r.rc;
}
