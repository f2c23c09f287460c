/*
** io/reader.c -- the generic reader: picks a format, opens it, and turns
** each feature it yields into lon/lat WGS 84.
**
** Input:  a path, optionally "file.gpkg:layer".
** Output: features numbered 0.. in read order, coordinates reprojected.
** Errors: a path that is a folder, FIFO or device (only regular files are
**         layers: a FIFO would block for ever); a layer without a CRS and
**         without --crs; a CRS PROJ does not know;
**         with strict_coords, a NaN/infinite coordinate or one PROJ cannot
**         transform (each names the file and the feature index).
*/
#include <math.h>
#include <stdio.h>
#include <string.h>
#include <sys/stat.h>

#include "ioInt.h"

static const st_reader_format *const formats[] = {
    &st_gpkg_reader_format,
    &st_shp_reader_format,
    &st_geojsonl_reader_format,
    &st_geojson_reader_format,
};

const char *st_path_ext(const char *path)
{
    const char *slash = strrchr(path, '/');
    const char *dot = strrchr(slash ? slash : path, '.');
    return dot ? dot : "";
}

char *st_path_stem(const char *path)
{
    const char *slash = strrchr(path, '/');
    const char *base = slash ? slash + 1 : path;
    const char *dot = strrchr(base, '.');
    return st_strndup(base, dot ? (size_t)(dot - base) : strlen(base));
}

st_status st_reader_fail(st_reader *r, st_status code, long long index,
                         const char *fmt, ...)
{
    st_loc loc = ST_LOC_FEATURE(r->path, index);
    va_list ap;
    va_start(ap, fmt);
    st_diags_addv(r->diags, ST_SEV_ERROR, code, &loc, fmt, ap);
    va_end(ap);
    return code;
}

/* Split "file.gpkg:layer" when the part before the last ':' is a file that
** exists and the whole spec is not. */
static st_status split_spec(const char *spec, char **path, char **layer)
{
    struct stat st;
    const char *colon = strrchr(spec, ':');
    *layer = NULL;
    if (colon && stat(spec, &st) != 0) {
        char *p = st_strndup(spec, (size_t)(colon - spec));
        if (!p)
            return ST_ERR_NOMEM;
        if (stat(p, &st) == 0) {
            *path = p;
            *layer = st_strdup(colon + 1);
            return *layer ? ST_OK : ST_ERR_NOMEM;
        }
        st_free(p);
    }
    *path = st_strdup(spec);
    return *path ? ST_OK : ST_ERR_NOMEM;
}

static st_status setup_crs(st_reader *r)
{
    const char *def = r->opt.crs_override ? r->opt.crs_override : r->crs_def;
    if (!def)
        return st_reader_fail(r, ST_ERR_PROJ, -1,
                              "the layer has no coordinate reference system; "
                              "say which one with --crs EPSG:NNNN");
    if (r->opt.keep_source_crs || st_crs_is_wgs84(def)) {
        /* a CRS PROJ cannot name is shown as written */
        r->crs_name = st_crs_identify(def);
        if (!r->crs_name)
            r->crs_name = st_strdup(def);
        return r->crs_name ? ST_OK : ST_ERR_NOMEM;
    }
    st_status rc = st_crs_to_wgs84(def, r->path, r->diags, &r->xform);
    if (rc != ST_OK)
        return rc;
    r->crs_name = st_strdup(r->xform ? st_crs_name(r->xform) : "EPSG:4326");
    return r->crs_name ? ST_OK : ST_ERR_NOMEM;
}

st_status st_reader_open(const char *spec, const st_read_options *opt,
                         st_diags *diags, st_reader **out)
{
    *out = NULL;
    st_reader *r = st_calloc(1, sizeof *r);
    if (!r)
        return ST_ERR_NOMEM;
    r->diags = diags;
    r->opt = opt ? *opt : ST_READ_OPTIONS_DEFAULT;
    r->count_hint = -1;
    st_fields_init(&r->fields);
    st_status rc = split_spec(spec, &r->path, &r->layer_request);
    if (rc != ST_OK) {
        st_reader_close(r);
        return rc;
    }
    /* A FIFO or device would block a probe (or a read) for ever, and a
    ** layer is read more than once (convert); only regular files are
    ** layers. A path that does not exist is left to the format's open. */
    struct stat st;
    if (stat(r->path, &st) == 0 && !S_ISREG(st.st_mode)) {
        rc = st_reader_fail(r, ST_ERR_IO, -1, "cannot open: %s",
                            S_ISDIR(st.st_mode) ? "it is a folder"
                                                : "not a regular file (a FIFO or a device)");
        st_reader_close(r);
        return rc;
    }
    for (size_t i = 0; i < sizeof formats / sizeof formats[0]; i++)
        if (formats[i]->probe(r->path)) {
            r->fmt = formats[i];
            break;
        }
    if (!r->fmt) {
        rc = st_reader_fail(r, ST_ERR_FORMAT, -1,
                            "unknown layer format '%s' (expected .shp, .geojson, "
                            ".geojsonl or .gpkg)", st_path_ext(r->path));
        st_reader_close(r);
        return rc;
    }
    rc = r->fmt->open(r);
    if (rc == ST_OK && !r->layer_name)
        rc = (r->layer_name = st_path_stem(r->path)) ? ST_OK : ST_ERR_NOMEM;
    if (rc == ST_OK)
        rc = setup_crs(r);
    if (rc != ST_OK) {
        st_reader_close(r);
        return rc;
    }
    *out = r;
    return ST_OK;
}

/* Reproject, then (when strict) refuse coordinates that are not finite
** or outside lon/lat range. */
static st_status finish_feature(st_reader *r, st_feature *f)
{
    st_geom *g = &f->geom;
    if (r->xform && g->ncoords) {
        size_t failed = 0;
        st_status rc = st_crs_apply(r->xform, g->xy, g->ncoords, &failed);
        if (rc != ST_OK)
            return st_reader_fail(r, rc, (long long)f->index,
                                  "coordinates could not be transformed from %s",
                                  r->crs_name);
    }
    if (!r->opt.strict_coords)
        return ST_OK;
    for (uint32_t i = 0; i < g->ncoords; i++) {
        double x = g->xy[2 * i], y = g->xy[2 * i + 1];
        if (!isfinite(x) || !isfinite(y))
            return st_reader_fail(r, ST_ERR_FORMAT, (long long)f->index,
                                  "coordinate %u is not a finite number in %s",
                                  i + 1, r->crs_name);
        if (!r->opt.keep_source_crs && (fabs(x) > 180.0 || fabs(y) > 90.0))
            return st_reader_fail(r, ST_ERR_FORMAT, (long long)f->index,
                                  "coordinate %u (%.9g %.9g) is outside the range of %s",
                                  i + 1, x, y, r->crs_name);
    }
    return ST_OK;
}

st_status st_reader_next(st_reader *r, st_feature **out)
{
    *out = NULL;
    st_feature *f = NULL;
    st_status rc = r->fmt->next(r, &f);
    if (rc != ST_OK || !f)
        return rc;
    f->index = r->next_index++;
    rc = finish_feature(r, f);
    if (rc != ST_OK) {
        st_feature_free(f);
        return rc;
    }
    *out = f;
    return ST_OK;
}

int st_reader_windowed(const st_reader *r) { return st_gpkg_reader_windowed(r); }
const st_fields *st_reader_fields(const st_reader *r) { return &r->fields; }
int st_reader_schema_fixed(const st_reader *r) { return r->schema_fixed; }
const char *st_reader_format_name(const st_reader *r) { return r->fmt->name; }
const char *st_reader_layer_name(const st_reader *r) { return r->layer_name; }
const char *st_reader_crs(const st_reader *r) { return r->crs_name; }

const char *st_reader_crs_def(const st_reader *r)
{
    return r->opt.crs_override ? r->opt.crs_override : r->crs_def;
}
long long st_reader_count_hint(const st_reader *r) { return r->count_hint; }
const char *st_reader_path(const st_reader *r) { return r->path; }

void st_reader_progress(const st_reader *r, long long *done, long long *total)
{
    *done = r->bytes_done;
    *total = r->bytes_total;
}

void st_reader_close(st_reader *r)
{
    if (!r)
        return;
    if (r->fmt && r->fmt->close)
        r->fmt->close(r);
    st_crs_free(r->xform);
    st_fields_free(&r->fields);
    st_free(r->path);
    st_free(r->layer_request);
    st_free(r->layer_name);
    st_free(r->crs_def);
    st_free(r->crs_name);
    st_free(r);
}
