/*
** pipeline/run_read.c -- the read stage: every input layer in turn, each
** feature given its layer, its bid (its position in read order over all
** layers, from 1) and a source id, made compact (geometry and attributes
** each packed into one block, trimmed to size) and counted against the
** memory budget.
** Whatever needs the whole layer is gathered from every feature as it
** passes (field types, the robust extent), so a tile (run --tile), which
** keeps only the features within reach of its window, learns the same.
** Each full chunk of kept features (and each layer's last) goes to the
** footprint checks as soon as it is read (run_geometry.c): they run on the
** other workers while this thread reads on.
*/
#include <stdlib.h>
#include <string.h>

#include "stocktake/footprint.h"
#include "stocktake/io.h"
#include "guardInt.h"
#include "pipelineInt.h"

static st_status push_feature(run_state *s, st_feature *f)
{
    if (s->nfeatures == s->capfeatures) {
        size_t cap = s->capfeatures ? s->capfeatures * 2 : 1024;
        st_feature **a = st_realloc(s->features, cap * sizeof *a);
        if (!a)
            return ST_ERR_NOMEM;
        s->features = a;
        s->capfeatures = cap;
    }
    s->features[s->nfeatures++] = f;
    return ST_OK;
}

/* A layer name unique in this run: the reader's name, then _2, _3 ... */
static char *unique_layer_name(run_state *s, size_t upto, const char *base)
{
    for (int k = 1;; k++) {
        char *name = k == 1 ? st_strdup(base) : st_strdup_printf("%s_%d", base, k);
        if (!name)
            return NULL;
        size_t i = 0;
        while (i < upto && strcmp(s->res->layers[i].name, name) != 0)
            i++;
        if (i == upto)
            return name;
        st_free(name);
    }
}

/* Per layer while reading: what the whole layer says, whether or not
** each feature is kept (a tile keeps only its window and halo). */
typedef struct layer_scan {
    uint8_t *text;               /* per field: a value that is not a number */
    uint32_t ntext;
    double *centres;             /* every feature's centre, for the extent */
    size_t ncentres, capcentres;
} layer_scan;

static void layer_scan_free(layer_scan *ls)
{
    st_free(ls->text);
    st_free(ls->centres);
}

/* GeoJSON types a field by its first value: a later "PB+2" in a field that
** began with 2 makes it text, so that the inventory does not declare a
** number column for it (GDAL reads such a value back as 0). Noted for
** every feature as it is read, kept or not. */
static st_status note_text_values(layer_scan *ls, const st_fields *fl, const st_feature *f)
{
    for (uint32_t k = 0; k < f->nvalues && k < fl->count; k++) {
        const st_field *fd = &fl->items[k];
        const char *v = f->values[k];
        if ((fd->type != ST_FIELD_INTEGER && fd->type != ST_FIELD_REAL) || !v || !*v)
            continue;
        char *end;
        (void)strtod(v, &end);
        if (!*end)
            continue;
        if (k >= ls->ntext) {
            uint8_t *t = st_realloc(ls->text, fl->count);
            if (!t)
                return ST_ERR_NOMEM;
            memset(t + ls->ntext, 0, fl->count - ls->ntext);
            ls->text = t;
            ls->ntext = fl->count;
        }
        ls->text[k] = 1;
    }
    return ST_OK;
}

static void demote_numeric_fields(const layer_scan *ls, st_fields *fl)
{
    for (uint32_t k = 0; k < ls->ntext && k < fl->count; k++)
        if (ls->text[k]) {
            fl->items[k].type = ST_FIELD_TEXT;
            fl->items[k].width = 0;
        }
}

/* The centre of every feature of the layer, for its robust extent (the
** swapped-axes check): 16 bytes a feature, freed after the layer. */
static st_status note_centre(layer_scan *ls, const st_feature *f)
{
    double c[2];
    if (!st_footprint_center(&f->geom, c))
        return ST_OK;
    if (ls->ncentres == ls->capcentres) {
        size_t cap = ls->capcentres ? 2 * ls->capcentres : 4096;
        double *a = st_realloc(ls->centres, 2 * cap * sizeof *a);
        if (!a)
            return ST_ERR_NOMEM;
        ls->centres = a;
        ls->capcentres = cap;
    }
    ls->centres[2 * ls->ncentres] = c[0];
    ls->centres[2 * ls->ncentres + 1] = c[1];
    ls->ncentres++;
    return ST_OK;
}

static int boxes_meet(const double a[4], const double b[4])
{
    return a[0] <= b[2] && b[0] <= a[2] && a[1] <= b[3] && b[1] <= a[3];
}

/* A tile keeps a feature that may end up in its window or halo: its box,
** or its box with the axes swapped (the footprint stage may swap them
** back), meets the grown window. Features without coordinates are kept:
** every part holds them (tile.h). */
static int in_reach(const run_state *s, const st_feature *f)
{
    if (!s->window)
        return 1;
    double b[4];
    if (!st_geom_bbox(&f->geom, b))
        return 1;
    double sw[4] = {b[1], b[0], b[3], b[2]};
    return boxes_meet(b, s->read_box) || boxes_meet(sw, s->read_box);
}

static st_status take_feature(run_state *s, st_reader *r, layer_scan *ls, size_t l,
                              st_feature *f)
{
    f->layer = (uint32_t)l;
    f->bid = ++s->nread;
    st_status rc = note_text_values(ls, st_reader_fields(r), f);
    if (rc == ST_OK)
        rc = note_centre(ls, f);
    if (rc != ST_OK || !in_reach(s, f)) {
        st_feature_free(f);
        return rc;
    }
    /* Every feature is held until the write: its geometry in one block
    ** trimmed to size (the builder doubles its arrays as it grows), its
    ** attributes in another (docs/performance.md, memory per footprint). */
    rc = st_geom_pack(&f->geom);
    /* A feature without an id of its own (a GeoJSON feature with no
    ** "id") is known by its 0-based position in the layer. */
    if (rc == ST_OK && !f->source_id &&
        !(f->source_id = st_strdup_printf("%llu", (unsigned long long)f->index)))
        rc = ST_ERR_NOMEM;
    if (rc == ST_OK)
        rc = st_feature_pack_values(f);
    if (rc == ST_OK)
        rc = st_run_guard_feature(&s->budget, f, st_reader_path(r), s->diags);
    if (rc == ST_OK)
        rc = push_feature(s, f);
    if (rc != ST_OK) {
        st_feature_free(f);
        return rc;
    }
    return st_run_footprints_feed(s, 0);   /* a full chunk: checked now */
}

static st_status read_layer(run_state *s, size_t l)
{
    st_read_options ro = ST_READ_OPTIONS_DEFAULT;
    ro.crs_override = s->opt->crs_override;
    st_reader *r = NULL;
    st_status rc = st_reader_open(s->opt->inputs[l], &ro, s->diags, &r);
    if (rc != ST_OK)
        return rc;
    st_run_layer *L = &s->res->layers[l];
    layer_scan ls;
    memset(&ls, 0, sizeof ls);
    for (;;) {
        st_feature *f = NULL;
        rc = st_reader_next(r, &f);
        if (rc != ST_OK || !f)
            break;
        if ((rc = take_feature(s, r, &ls, l, f)) != ST_OK)
            break;
        L->read++;
        if ((L->read & 0x3FFF) == 0) {
            if ((rc = st_run_check_stop(s)) != ST_OK)
                break;
            long long done, total;
            st_reader_progress(r, &done, &total);
            st_run_progress(s, "read", done, total);
        }
    }
    if (rc == ST_OK) {
        L->name = unique_layer_name(s, l, st_reader_layer_name(r));
        L->path = st_strdup(st_reader_path(r));
        L->format = st_strdup(st_reader_format_name(r));
        L->crs = st_strdup(st_reader_crs(r) ? st_reader_crs(r) : "");
        rc = L->name && L->path && L->format && L->crs ? ST_OK : ST_ERR_NOMEM;
    }
    if (rc == ST_OK)
        rc = st_run_footprints_feed(s, 1);   /* the layer's last chunk */
    if (rc == ST_OK)
        rc = st_fields_copy(&s->fields[l], st_reader_fields(r));
    if (rc == ST_OK)
        demote_numeric_fields(&ls, &s->fields[l]);
    if (rc == ST_OK)
        rc = st_footprint_extent_compute(ls.centres, ls.ncentres, &s->extents[l]);
    layer_scan_free(&ls);
    st_reader_close(r);
    return rc;
}

st_status st_stage_read(run_state *s)
{
    st_status rc = st_run_footprints_begin(s);
    for (size_t l = 0; rc == ST_OK && l < s->opt->ninputs; l++)
        rc = read_layer(s, l);
    if (rc != ST_OK)
        st_run_footprints_cancel(s);
    return rc;
}
