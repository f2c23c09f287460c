/*
** io/writer.c -- the generic writer: picks a format by extension, writes to
** a temporary name in the target's folder, renames on commit.
**
** Why the same folder: rename(2) is atomic only within one file system, so
** a reader of 'path' sees either the old file or the whole new one.
*/
#include <stdio.h>
#include <string.h>
#include <unistd.h>

#include "ioInt.h"

static const st_writer_format *const formats[] = {
    &st_gpkg_writer_format,
    &st_geojsonl_writer_format,
    &st_geojson_writer_format,
    &st_csv_writer_format,
    &st_shp_writer_format,
};

static const st_writer_format *find_format(const char *path)
{
    const char *ext = st_path_ext(path);
    for (size_t i = 0; i < sizeof formats / sizeof formats[0]; i++)
        for (const char *const *e = formats[i]->extensions; *e; e++)
            if (st_str_ends_with_ci(ext, *e) && strlen(ext) == strlen(*e))
                return formats[i];
    return NULL;
}

int st_writer_supports(const char *path)
{
    return find_format(path) != NULL;
}

st_status st_writer_fail(st_writer *w, st_status code, const char *fmt, ...)
{
    st_loc loc = ST_LOC_FILE(w->path);
    va_list ap;
    va_start(ap, fmt);
    st_diags_addv(w->diags, ST_SEV_ERROR, code, &loc, fmt, ap);
    va_end(ap);
    return code;
}

char *st_io_temp_name(const char *path)
{
    const char *slash = strrchr(path, '/');
    size_t dirlen = slash ? (size_t)(slash - path + 1) : 0;
    const char *base = path + dirlen;
    const char *ext = st_path_ext(path);
    size_t stemlen = strlen(base) - strlen(ext);
    return st_strdup_printf("%.*s.%.*s.tmp-%ld%s", (int)dirlen, path,
                            (int)stemlen, base, (long)getpid(), ext);
}

st_status st_writer_open(const char *path, st_diags *diags, st_writer **out)
{
    *out = NULL;
    st_writer *w = st_calloc(1, sizeof *w);
    if (!w)
        return ST_ERR_NOMEM;
    w->diags = diags;
    st_buf_init(&w->notes, 0);
    w->path = st_strdup(path);
    w->tmp_path = st_io_temp_name(path);
    if (!w->path || !w->tmp_path) {
        st_writer_close(w);
        return ST_ERR_NOMEM;
    }
    w->fmt = find_format(path);
    if (!w->fmt) {
        st_status rc = st_writer_fail(w, ST_ERR_USAGE,
                                      "unknown output format '%s' (expected .gpkg, "
                                      ".geojson, .geojsonl, .csv or .shp)",
                                      st_path_ext(path));
        st_writer_close(w);
        return rc;
    }
    st_status rc = w->fmt->open(w);
    if (rc != ST_OK) {
        st_writer_close(w);
        return rc;
    }
    *out = w;
    return ST_OK;
}

st_status st_writer_begin_layer(st_writer *w, const char *name,
                                const st_fields *fields, st_geom_type type)
{
    if (w->in_layer)
        return st_writer_fail(w, ST_ERR_USAGE,
                              "layer '%s' begun before the previous one ended", name);
    if (w->layers_begun && !w->fmt->multi_layer)
        return st_writer_fail(w, ST_ERR_USAGE,
                              "format %s holds one layer only", w->fmt->name);
    st_status rc = w->fmt->begin_layer(w, name, fields, type);
    if (rc == ST_OK) {
        w->layers_begun++;
        w->in_layer = 1;
        w->nfields = fields->count;
    }
    return rc;
}

st_status st_writer_write(st_writer *w, const st_feature *f)
{
    return w->fmt->write(w, f);
}

st_status st_writer_row_init(st_row *row, uint32_t nvalues)
{
    memset(row, 0, sizeof *row);
    st_buf_init(&row->text, 0);
    st_geom_init(&row->point);
    row->f.values = st_calloc(nvalues ? nvalues : 1, sizeof *row->f.values);
    row->f.nvalues = nvalues;
    return row->f.values ? ST_OK : ST_ERR_NOMEM;
}

st_status st_writer_row_fill(st_row *row, st_row_fill fill, void *ctx, size_t k)
{
    char **values = row->f.values;
    uint32_t n = row->f.nvalues;
    memset(&row->f, 0, sizeof row->f);
    memset(values, 0, (n ? n : 1) * sizeof *values);
    row->f.values = values;
    row->f.nvalues = n;
    st_buf_clear(&row->text);
    return fill(ctx, k, row);
}

void st_writer_row_free(st_row *row)
{
    st_free(row->f.values);
    st_buf_free(&row->text);
    st_geom_clear(&row->point);
    memset(row, 0, sizeof *row);
}

st_status st_writer_write_rows(st_writer *w, size_t n, st_row_fill fill, void *ctx,
                               unsigned nthreads)
{
    if (!w->in_layer)
        return st_writer_fail(w, ST_ERR_USAGE, "rows were written outside a layer");
    if (w->fmt->write_rows)
        return w->fmt->write_rows(w, n, fill, ctx, nthreads);
    st_row row;
    st_status rc = st_writer_row_init(&row, w->nfields);
    for (size_t k = 0; rc == ST_OK && k < n; k++) {
        rc = st_writer_row_fill(&row, fill, ctx, k);
        if (rc == ST_OK)
            rc = w->fmt->write(w, &row.f);
    }
    st_writer_row_free(&row);
    return rc;
}

st_status st_writer_end_layer(st_writer *w)
{
    w->in_layer = 0;
    return w->fmt->end_layer(w);
}

st_status st_writer_commit(st_writer *w)
{
    st_status rc = w->in_layer ? st_writer_end_layer(w) : ST_OK;
    if (rc == ST_OK)
        rc = w->fmt->finish(w);
    if (rc != ST_OK)
        return rc;
    w->finished = 1;
    if (w->fmt->commit)
        rc = w->fmt->commit(w);
    else if (rename(w->tmp_path, w->path) != 0)
        rc = st_writer_fail(w, ST_ERR_IO, "cannot rename the finished output into place");
    if (rc == ST_OK)
        w->committed = 1;
    return rc;
}

const char *st_writer_notes(const st_writer *w)
{
    return w->notes.len ? w->notes.data : NULL;
}

void st_writer_close(st_writer *w)
{
    if (!w)
        return;
    if (w->fmt && !w->committed) {
        if (!w->finished)
            w->fmt->discard(w);
        else if (!w->fmt->commit)
            remove(w->tmp_path);
        else
            w->fmt->discard(w);   /* impl is gone; removes leftover files */
    }
    st_buf_free(&w->notes);
    st_free(w->path);
    st_free(w->tmp_path);
    st_free(w);
}
