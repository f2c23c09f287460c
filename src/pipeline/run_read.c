/*
** pipeline/run_read.c -- the read stage: every input layer in turn, each
** feature given its layer, its bid (its position in read order over all
** layers, from 1) and a source id, made compact (coordinates trimmed,
** attributes packed) and counted against the memory budget.
*/
#include <stdlib.h>
#include <string.h>

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

/* Give back what the geometry builder over-allocated (it doubles its
** arrays): every feature is held until the write, so the slack of a
** million coordinate arrays adds up (docs/performance.md, memory). */
static void trim_geometry(st_geom *g)
{
    if (g->xy && g->cap_coords > g->ncoords && g->ncoords > 0) {
        double *xy = st_realloc(g->xy, 2 * (size_t)g->ncoords * sizeof *xy);
        if (xy) {
            g->xy = xy;
            g->cap_coords = g->ncoords;
        }
    }
}

/* GeoJSON types a field by its first value: a later "PB+2" in a field that
** began with 2 makes it text, so that the inventory does not declare a
** number column for it (GDAL reads such a value back as 0). 'first' is the
** layer's first feature. */
static void demote_numeric_fields(run_state *s, size_t l, size_t first)
{
    st_fields *fl = &s->fields[l];
    for (size_t i = first; i < s->nfeatures; i++) {
        const st_feature *f = s->features[i];
        for (uint32_t k = 0; k < f->nvalues && k < fl->count; k++) {
            st_field *fd = &fl->items[k];
            const char *v = f->values[k];
            if ((fd->type != ST_FIELD_INTEGER && fd->type != ST_FIELD_REAL) || !v || !*v)
                continue;
            char *end;
            (void)strtod(v, &end);
            if (*end) {
                fd->type = ST_FIELD_TEXT;
                fd->width = 0;
            }
        }
    }
}

static st_status read_layer(run_state *s, size_t l)
{
    size_t first = s->nfeatures;
    st_read_options ro = ST_READ_OPTIONS_DEFAULT;
    ro.crs_override = s->opt->crs_override;
    st_reader *r = NULL;
    st_status rc = st_reader_open(s->opt->inputs[l], &ro, s->diags, &r);
    if (rc != ST_OK)
        return rc;
    st_run_layer *L = &s->res->layers[l];
    for (;;) {
        st_feature *f = NULL;
        rc = st_reader_next(r, &f);
        if (rc != ST_OK || !f)
            break;
        f->layer = (uint32_t)l;
        f->bid = (uint64_t)s->nfeatures + 1;
        trim_geometry(&f->geom);
        /* A feature without an id of its own (a GeoJSON feature with no
        ** "id") is known by its 0-based position in the layer. */
        if (!f->source_id &&
            !(f->source_id = st_strdup_printf("%llu", (unsigned long long)f->index)))
            rc = ST_ERR_NOMEM;
        if (rc == ST_OK)
            rc = st_feature_pack_values(f);   /* one block: memory */
        if (rc == ST_OK)
            rc = st_run_guard_feature(&s->budget, f, st_reader_path(r), s->diags);
        if (rc == ST_OK)
            rc = push_feature(s, f);
        if (rc != ST_OK) {
            st_feature_free(f);
            break;
        }
        L->read++;
        if ((L->read & 0x3FFF) == 0) {
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
        rc = st_fields_copy(&s->fields[l], st_reader_fields(r));
    if (rc == ST_OK)
        demote_numeric_fields(s, l, first);
    st_reader_close(r);
    return rc;
}

st_status st_stage_read(run_state *s)
{
    st_status rc = ST_OK;
    for (size_t l = 0; rc == ST_OK && l < s->opt->ninputs; l++)
        rc = read_layer(s, l);
    return rc;
}
