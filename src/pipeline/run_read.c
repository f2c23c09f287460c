/*
** pipeline/run_read.c -- the read stage: every input layer in turn, each
** feature given its layer, its bid (its position in read order over all
** layers, from 1) and a source id, made compact (geometry and attributes
** each packed into one block, trimmed to size) and counted against the
** memory budget.
** Whatever needs the whole layer is gathered from every feature as it
** passes (field types, the robust extent; facts.h), so a tile (run
** --tile), which keeps only the features within reach of its window,
** learns the same. A tile given the layer facts (--facts) takes them from
** there instead and reads a GeoPackage through its R-tree (run_facts.c);
** a layer it still streams whole must then say what the facts say.
** Each full chunk of kept features (and each layer's last) goes to the
** footprint checks as soon as it is read (run_geometry.c): they run on the
** other workers while this thread reads on.
*/
#include <stdlib.h>
#include <string.h>

#include "stocktake/facts.h"
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

/* A numeric field in which the layer holds a value that is not a number
** is written as text (facts.c note_text_values says why). */
static void demote_numeric_fields(const st_facts_layer *lf, st_fields *fl)
{
    for (uint32_t k = 0; k < lf->nfields && k < fl->count; k++)
        if (lf->text[k]) {
            fl->items[k].type = ST_FIELD_TEXT;
            fl->items[k].width = 0;
        }
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

/* One layer being read: what the whole layer says is gathered from every
** feature as it passes (the scan), unless the layer is read through its
** R-tree and its facts come from the facts file. */
typedef struct layer_read {
    size_t l;
    uint64_t offset;             /* features of the layers before */
    st_reader *r;
    const st_facts_layer *given; /* from --facts, or NULL */
    st_facts_scan scan;
    st_facts_layer seen;
    uint64_t rows;               /* features the reader gave */
} layer_read;

static st_status take_feature(run_state *s, layer_read *lr, st_feature *f)
{
    st_reader *r = lr->r;
    f->layer = (uint32_t)lr->l;
    f->bid = lr->offset + f->index + 1;
    st_status rc = ST_OK;
    if (!st_reader_windowed(r))
        rc = st_facts_scan_feature(&lr->scan, &lr->seen, st_reader_fields(r), f,
                                   !strcmp(st_reader_format_name(r), "gpkg"));
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

static st_status read_features(run_state *s, layer_read *lr)
{
    st_status rc = ST_OK;
    for (;;) {
        st_feature *f = NULL;
        rc = st_reader_next(lr->r, &f);
        if (rc != ST_OK || !f)
            break;
        lr->rows++;
        if ((rc = take_feature(s, lr, f)) != ST_OK)
            break;
        if ((lr->rows & 0x3FFF) == 0) {
            if ((rc = st_run_check_stop(s)) != ST_OK)
                break;
            long long done, total;
            st_reader_progress(lr->r, &done, &total);
            st_run_progress(s, "read", done, total);
        }
    }
    return rc;
}

static st_status describe_layer(run_state *s, size_t l, st_reader *r)
{
    st_run_layer *L = &s->res->layers[l];
    L->name = unique_layer_name(s, l, st_reader_layer_name(r));
    L->path = st_strdup(st_reader_path(r));
    L->format = st_strdup(st_reader_format_name(r));
    L->crs = st_strdup(st_reader_crs(r) ? st_reader_crs(r) : "");
    return L->name && L->path && L->format && L->crs ? ST_OK : ST_ERR_NOMEM;
}

/* The layer's facts: from the facts file when read through the window,
** else from the scan (which must then agree with the file, if any). */
static st_status settle_facts(run_state *s, layer_read *lr, const st_facts_layer **out)
{
    *out = lr->given;
    if (st_reader_windowed(lr->r)) {
        st_loc loc = ST_LOC_FILE(st_reader_path(lr->r));
        st_diags_add(s->diags, ST_SEV_NOTE, ST_OK, &loc, "read %llu of %llu features through "
                     "the R-tree (%s and halo)",
                     (unsigned long long)lr->rows,
                     (unsigned long long)lr->given->count, s->window->label);
        return ST_OK;
    }
    st_status rc = st_facts_scan_end(&lr->scan, &lr->seen, st_reader_fields(lr->r));
    if (rc == ST_OK && lr->given && !st_facts_same_content(&lr->seen, lr->given))
        rc = st_run_facts_mismatch(s, lr->l, "its features are not what the facts say "
                                   "(count, field values or extent)");
    *out = &lr->seen;
    return rc;
}

static st_status read_layer(run_state *s, size_t l)
{
    layer_read lr;
    memset(&lr, 0, sizeof lr);
    lr.l = l;
    lr.offset = s->nread;
    lr.given = s->facts ? &s->facts->layers[l] : NULL;
    st_read_window win;
    st_read_options ro = ST_READ_OPTIONS_DEFAULT;
    ro.crs_override = s->opt->crs_override;
    if (st_run_facts_window(s, lr.given, &win))
        ro.window = &win;
    st_status rc = st_reader_open(s->opt->inputs[l], &ro, s->diags, &lr.r);
    if (rc != ST_OK)
        return rc;
    st_facts_scan_begin(&lr.scan, &lr.seen);
    if (lr.given)
        rc = st_run_facts_check_input(s, l, lr.r);
    if (rc == ST_OK)
        rc = read_features(s, &lr);
    if (rc == ST_OK)
        rc = describe_layer(s, l, lr.r);
    if (rc == ST_OK)
        rc = st_run_footprints_feed(s, 1);   /* the layer's last chunk */
    const st_facts_layer *facts = NULL;
    if (rc == ST_OK)
        rc = settle_facts(s, &lr, &facts);
    if (rc == ST_OK)
        rc = st_fields_copy(&s->fields[l], st_reader_fields(lr.r));
    if (rc == ST_OK) {
        demote_numeric_fields(facts, &s->fields[l]);
        s->extents[l] = facts->extent;
        s->res->layers[l].read = facts->count;
        s->nread = lr.offset + facts->count;
    }
    st_facts_scan_free(&lr.scan);
    st_facts_layer_free(&lr.seen);
    st_reader_close(lr.r);
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
