/*
** inventory/inventory.c -- the curated inventory's layers and columns.
**
** Input:  features after every stage, the findings, run metadata.
** Output: one GeoPackage with layers buildings, set_aside, findings,
**         run_info, unmapped and (with districts) districts, or, for
**         single-layer formats, one file per layer (see
**         st_inventory_sibling_path).
** Errors: whatever the writers report; nothing is renamed into place
**         before st_inventory_commit, so a failed run leaves nothing.
** Threads: the rows of buildings, set_aside, findings and districts are
**         filled on demand (st_writer_write_rows), on the GeoPackage
**         writer's helper threads when st_inventory_set_threads asks for
**         them: the fills only read the features and the inventory, and
**         write into the row they are given.
*/
#include <math.h>
#include <stdio.h>
#include <string.h>

#include "stocktake/footprint.h"
#include "stocktake/inventory.h"
#include "stocktake/io.h"

enum { L_BUILDINGS, L_SET_ASIDE, L_FINDINGS, L_RUN_INFO, L_UNMAPPED, L_DISTRICTS, L_COUNT };

static const char *const layer_names[L_COUNT] = {
    "buildings", "set_aside", "findings", "run_info", "unmapped", "districts"};

/* Our own leading columns; a source attribute with one of these names is
** written as src_<name>. */
static const char *const building_cols[] = {
    "bid", "layer", "source_id", "status", "area_m2", "perimeter_m", "flags", "district"};
static const char *const set_aside_cols[] = {
    "bid", "layer", "source_id", "status", "reason", "duplicate_of", "district"};
#define N_BUILDING_COLS (sizeof building_cols / sizeof building_cols[0])
#define N_SET_ASIDE_COLS (sizeof set_aside_cols / sizeof set_aside_cols[0])

struct st_inventory {
    st_diags *diags;
    int multi;                     /* one GeoPackage holds every layer */
    st_writer *w[L_COUNT];         /* w[0] only, when multi */
    char *path;
    uint32_t nlayers;
    char **layer_names;            /* input layer names, owned */
    uint32_t **colmap;             /* per input layer: field -> source column */
    uint32_t *nfields;             /* per input layer */
    st_fields source;              /* union of source attributes */
    char **schema;                 /* schema field names, owned */
    uint32_t nschema;
    st_fields bfields, sfields;    /* output columns of the two feature layers */
    unsigned threads;              /* helpers of the GeoPackage writer (1: none) */
};

char *st_inventory_sibling_path(const char *path, const char *layer)
{
    const char *slash = strrchr(path, '/');
    const char *dot = strrchr(slash ? slash : path, '.');
    size_t stem = dot ? (size_t)(dot - path) : strlen(path);
    return st_strdup_printf("%.*s.%s%s", (int)stem, path, layer, dot ? dot : "");
}

static int is_reserved(const char *name, const char *const *cols, size_t n)
{
    for (size_t i = 0; i < n; i++)
        if (!strcmp(name, cols[i]))
            return 1;
    return !strcmp(name, "fid") || !strcmp(name, "geom");
}

/* The union of source fields; a name colliding with our columns (or with
** a schema column) gets the src_ prefix. */
static st_status build_source_columns(st_inventory *inv, const st_inventory_layer *layers)
{
    for (uint32_t l = 0; l < inv->nlayers; l++) {
        const st_fields *f = layers[l].fields;
        inv->nfields[l] = f->count;
        inv->colmap[l] = st_calloc(f->count ? f->count : 1, sizeof **inv->colmap);
        if (!inv->colmap[l])
            return ST_ERR_NOMEM;
        for (uint32_t i = 0; i < f->count; i++) {
            const char *name = f->items[i].name;
            int clash = is_reserved(name, building_cols, N_BUILDING_COLS) ||
                        is_reserved(name, set_aside_cols, N_SET_ASIDE_COLS);
            for (uint32_t s = 0; !clash && s < inv->nschema; s++) {
                size_t k = strlen(inv->schema[s]);
                clash = !strncmp(name, inv->schema[s], k) &&
                        (!name[k] || !strcmp(name + k, "_from") || !strcmp(name + k, "_rule"));
            }
            char *out = clash ? st_strdup_printf("src_%s", name) : st_strdup(name);
            if (!out)
                return ST_ERR_NOMEM;
            int32_t had = st_fields_find(&inv->source, out);
            uint32_t at;
            st_status rc = st_fields_add(&inv->source, out, f->items[i].type,
                                         f->items[i].width, f->items[i].decimals, &at);
            st_free(out);
            if (rc != ST_OK)
                return rc;
            if (had >= 0 && inv->source.items[at].type != f->items[i].type)
                inv->source.items[at].type = ST_FIELD_TEXT;   /* layers disagree */
            inv->colmap[l][i] = at;
        }
    }
    return ST_OK;
}

static st_status add_cols(st_fields *out, const char *const *cols, size_t n)
{
    static const st_field_type types[] = {
        ST_FIELD_INTEGER, ST_FIELD_TEXT, ST_FIELD_TEXT, ST_FIELD_TEXT,
        ST_FIELD_REAL, ST_FIELD_REAL, ST_FIELD_TEXT, ST_FIELD_TEXT};
    for (size_t i = 0; i < n; i++) {
        st_field_type t = out == NULL ? ST_FIELD_TEXT : types[i];
        if (cols == set_aside_cols)
            t = (i == 0 || i == 5) ? ST_FIELD_INTEGER : ST_FIELD_TEXT;
        st_status rc = st_fields_add(out, cols[i], t, 0, 0, NULL);
        if (rc != ST_OK)
            return rc;
    }
    return ST_OK;
}

static st_status append_fields(st_fields *out, const st_fields *src)
{
    for (uint32_t i = 0; i < src->count; i++) {
        st_status rc = st_fields_add(out, src->items[i].name, src->items[i].type,
                                     src->items[i].width, src->items[i].decimals, NULL);
        if (rc != ST_OK)
            return rc;
    }
    return ST_OK;
}

static st_status build_output_columns(st_inventory *inv)
{
    st_status rc = add_cols(&inv->bfields, building_cols, N_BUILDING_COLS);
    for (uint32_t s = 0; rc == ST_OK && s < inv->nschema; s++) {
        char *from = st_strdup_printf("%s_from", inv->schema[s]);
        char *rule = st_strdup_printf("%s_rule", inv->schema[s]);
        rc = from && rule ? ST_OK : ST_ERR_NOMEM;
        if (rc == ST_OK)
            rc = st_fields_add(&inv->bfields, inv->schema[s], ST_FIELD_TEXT, 0, 0, NULL);
        if (rc == ST_OK)
            rc = st_fields_add(&inv->bfields, from, ST_FIELD_TEXT, 0, 0, NULL);
        if (rc == ST_OK)
            rc = st_fields_add(&inv->bfields, rule, ST_FIELD_TEXT, 0, 0, NULL);
        st_free(from);
        st_free(rule);
    }
    if (rc == ST_OK)
        rc = append_fields(&inv->bfields, &inv->source);
    if (rc == ST_OK)
        rc = add_cols(&inv->sfields, set_aside_cols, N_SET_ASIDE_COLS);
    if (rc == ST_OK)
        rc = append_fields(&inv->sfields, &inv->source);
    return rc;
}

static st_status open_writers(st_inventory *inv)
{
    if (inv->multi)
        return st_writer_open(inv->path, inv->diags, &inv->w[0]);
    for (int l = 0; l < L_DISTRICTS; l++) {   /* districts: opened when written */
        /* run_info and unmapped are tables: CSV beside a single-layer output. */
        char *p;
        if (l == L_BUILDINGS)
            p = st_strdup(inv->path);
        else if (l == L_RUN_INFO || l == L_UNMAPPED) {
            char *g = st_inventory_sibling_path(inv->path, layer_names[l]);
            const char *dot = g ? strrchr(g, '.') : NULL;
            p = g ? st_strdup_printf("%.*s.csv", (int)(dot - g), g) : NULL;
            st_free(g);
        } else
            p = st_inventory_sibling_path(inv->path, layer_names[l]);
        if (!p)
            return ST_ERR_NOMEM;
        st_status rc = st_writer_open(p, inv->diags, &inv->w[l]);
        st_free(p);
        if (rc != ST_OK)
            return rc;
    }
    return ST_OK;
}

static st_writer *writer_for(st_inventory *inv, int layer)
{
    return inv->multi ? inv->w[0] : inv->w[layer];
}

st_status st_inventory_open(const char *path, const st_inventory_layer *layers,
                            uint32_t nlayers, const char *const *schema,
                            uint32_t nschema, st_diags *diags, st_inventory **out)
{
    *out = NULL;
    st_inventory *inv = st_calloc(1, sizeof *inv);
    if (!inv)
        return ST_ERR_NOMEM;
    inv->diags = diags;
    inv->threads = 1;
    inv->multi = st_str_ends_with_ci(path, ".gpkg");
    inv->path = st_strdup(path);
    inv->nlayers = nlayers;
    inv->layer_names = st_calloc(nlayers ? nlayers : 1, sizeof *inv->layer_names);
    inv->colmap = st_calloc(nlayers ? nlayers : 1, sizeof *inv->colmap);
    inv->nfields = st_calloc(nlayers ? nlayers : 1, sizeof *inv->nfields);
    inv->schema = st_calloc(nschema ? nschema : 1, sizeof *inv->schema);
    st_status rc = inv->path && inv->layer_names && inv->colmap && inv->nfields &&
                   inv->schema ? ST_OK : ST_ERR_NOMEM;
    for (uint32_t l = 0; rc == ST_OK && l < nlayers; l++)
        if (!(inv->layer_names[l] = st_strdup(layers[l].name)))
            rc = ST_ERR_NOMEM;
    for (uint32_t s = 0; rc == ST_OK && s < nschema; s++) {
        if (!(inv->schema[s] = st_strdup(schema[s])))
            rc = ST_ERR_NOMEM;
        inv->nschema = s + 1;
    }
    if (rc == ST_OK)
        rc = build_source_columns(inv, layers);
    if (rc == ST_OK)
        rc = build_output_columns(inv);
    if (rc == ST_OK)
        rc = open_writers(inv);
    if (rc != ST_OK) {
        st_inventory_close(inv);
        return rc;
    }
    *out = inv;
    return ST_OK;
}

void st_inventory_set_threads(st_inventory *inv, unsigned nthreads)
{
    inv->threads = nthreads ? nthreads : 1;
}

/* Put a number into the row's text and return where it starts (offsets
** stay valid while the text grows; pointers are taken once it is done). */
static size_t text_num(st_buf *text, int decimals, double v, st_status *rc)
{
    size_t at = text->len;
    char digits[ST_FMT_FIXED_MAX];
    size_t n = st_fmt_fixed(digits, v, decimals);   /* printf's "%.<decimals>f" */
    if (*rc == ST_OK)
        *rc = st_buf_append(text, digits, n + 1);   /* with the NUL */
    return at;
}

static void place_source_values(const st_inventory *inv, const st_feature *f, char **row,
                                size_t first)
{
    uint32_t l = f->layer < inv->nlayers ? f->layer : 0;
    for (uint32_t i = 0; i < f->nvalues && i < inv->nfields[l]; i++)
        row[first + inv->colmap[l][i]] = f->values[i];
}

/* The row's geometry (a borrowed view of f's), source id and bid. */
static void row_feature(st_feature *r, const st_feature *f, int promote)
{
    r->geom = f->geom;
    /* set_aside keeps the geometry as read, also when a stage replaced it */
    if (!promote && f->source_geom && f->source_geom->type != ST_GEOM_NULL)
        r->geom = *f->source_geom;
    /* buildings is declared MULTIPOLYGON: a polygon is written as a
    ** one-part multipolygon (same arrays, another type tag). */
    if (promote && r->geom.type == ST_GEOM_POLYGON)
        r->geom.type = ST_GEOM_MULTIPOLYGON;
    r->source_id = f->source_id;
    r->bid = f->bid;
}

static st_status write_row(st_writer *w, const st_feature *f, char **row, uint32_t n,
                           int promote)
{
    st_feature r;
    memset(&r, 0, sizeof r);
    row_feature(&r, f, promote);
    r.values = row;
    r.nvalues = n;
    return st_writer_write(w, &r);
}

/* What the row fills of the two feature layers read (all shared, read
** only: the fills run on several threads). */
typedef struct feature_rows {
    const st_inventory *inv;
    st_feature *const *fs;
    const char *const *district_names;
} feature_rows;

static const char *district_name(const feature_rows *fr, const st_feature *f)
{
    return f->district >= 0 && fr->district_names ? fr->district_names[f->district] : "none";
}

static st_status fill_building(void *ctx, size_t k, st_row *row)
{
    const feature_rows *fr = ctx;
    const st_inventory *inv = fr->inv;
    const st_feature *f = fr->fs[k];
    st_buf *t = &row->text;
    st_status rc = ST_OK;
    size_t bid = text_num(t, 0, (double)f->bid, &rc);
    size_t area = text_num(t, 2, f->area_m2, &rc);
    size_t per = text_num(t, 2, f->perimeter_m, &rc);
    size_t flags = t->len;
    if (rc == ST_OK)
        rc = st_footprint_flag_names(f->flags, t);
    if (rc == ST_OK)
        rc = st_buf_append(t, "", 1);
    if (rc != ST_OK)
        return rc;
    char **v = row->f.values;
    v[0] = t->data + bid;
    v[1] = inv->layer_names[f->layer < inv->nlayers ? f->layer : 0];
    v[2] = f->source_id;
    v[3] = (char *)st_feature_status_name(f->status);
    v[4] = t->data + area;
    v[5] = t->data + per;
    v[6] = t->data + flags;
    v[7] = (char *)district_name(fr, f);
    for (uint32_t s = 0; s < inv->nschema && s < f->nschema; s++) {
        v[N_BUILDING_COLS + 3 * s] = f->schema[s].text;
        v[N_BUILDING_COLS + 3 * s + 1] = (char *)st_provenance_name(f->schema[s].from);
        v[N_BUILDING_COLS + 3 * s + 2] = (char *)f->schema[s].rule;
    }
    place_source_values(inv, f, v, N_BUILDING_COLS + 3 * (size_t)inv->nschema);
    row_feature(&row->f, f, 1);
    return ST_OK;
}

/* One whole layer: begin it, its n rows from 'fill' (on the writer's
** helper threads), end it. */
static st_status write_layer(st_inventory *inv, int layer, const char *name,
                             const st_fields *fields, st_geom_type type, size_t n,
                             st_row_fill fill, void *ctx)
{
    st_writer *w = writer_for(inv, layer);
    st_status rc = st_writer_begin_layer(w, name, fields, type);
    if (rc == ST_OK)
        rc = st_writer_write_rows(w, n, fill, ctx, inv->threads);
    if (rc == ST_OK)
        rc = st_writer_end_layer(w);
    return rc;
}

st_status st_inventory_write_buildings(st_inventory *inv, st_feature *const *fs,
                                       size_t n, const char *const *district_names)
{
    feature_rows fr = {inv, fs, district_names};
    return write_layer(inv, L_BUILDINGS, "buildings", &inv->bfields, ST_GEOM_MULTIPOLYGON, n,
                       fill_building, &fr);
}

static st_status fill_set_aside(void *ctx, size_t k, st_row *row)
{
    const feature_rows *fr = ctx;
    const st_inventory *inv = fr->inv;
    const st_feature *f = fr->fs[k];
    st_buf *t = &row->text;
    st_status rc = ST_OK;
    size_t bid = text_num(t, 0, (double)f->bid, &rc);
    size_t dup = text_num(t, 0, (double)f->duplicate_of, &rc);
    if (rc != ST_OK)
        return rc;
    char **v = row->f.values;
    v[0] = t->data + bid;
    v[1] = inv->layer_names[f->layer < inv->nlayers ? f->layer : 0];
    v[2] = f->source_id;
    v[3] = (char *)st_feature_status_name(f->status);
    v[4] = f->reason;
    v[5] = f->status == ST_STATUS_DUPLICATE ? t->data + dup : NULL;
    v[6] = (char *)district_name(fr, f);
    place_source_values(inv, f, v, N_SET_ASIDE_COLS);
    row_feature(&row->f, f, 0);
    return ST_OK;
}

st_status st_inventory_write_set_aside(st_inventory *inv, st_feature *const *fs, size_t n,
                                      const char *const *district_names)
{
    feature_rows fr = {inv, fs, district_names};
    return write_layer(inv, L_SET_ASIDE, "set_aside", &inv->sfields, ST_GEOM_OTHER, n,
                       fill_set_aside, &fr);
}

static st_status fill_finding(void *ctx, size_t k, st_row *row)
{
    const st_finding *g = &((const st_findings *)ctx)->items[k];
    st_buf *t = &row->text;
    st_status rc = ST_OK;
    size_t bid = text_num(t, 0, (double)g->bid, &rc);
    st_geom_reset(&row->point);
    if (rc == ST_OK && isfinite(g->x) && isfinite(g->y)) {
        row->point.type = ST_GEOM_POINT;
        rc = st_geom_add_xy(&row->point, g->x, g->y);
    }
    if (rc != ST_OK)
        return rc;
    char **v = row->f.values;
    v[0] = t->data + bid;
    v[1] = (char *)g->code;
    v[2] = (char *)st_severity_name(g->severity);
    v[3] = g->message;
    row->f.geom = row->point;   /* borrowed view */
    row->f.bid = g->bid;
    return ST_OK;
}

st_status st_inventory_write_findings(st_inventory *inv, const st_findings *fl)
{
    static const char *const cols[] = {"bid", "code", "severity", "message"};
    static const st_field_type types[] = {ST_FIELD_INTEGER, ST_FIELD_TEXT,
                                          ST_FIELD_TEXT, ST_FIELD_TEXT};
    st_fields fields;
    st_fields_init(&fields);
    st_status rc = ST_OK;
    for (int i = 0; rc == ST_OK && i < 4; i++)
        rc = st_fields_add(&fields, cols[i], types[i], 0, 0, NULL);
    if (rc == ST_OK)
        rc = write_layer(inv, L_FINDINGS, "findings", &fields, ST_GEOM_POINT, fl->count,
                         fill_finding, (void *)fl);
    st_fields_free(&fields);
    return rc;
}

/* An attribute table of text columns 'cols' (ncols), n rows of ncols
** strings each (borrowed). */
static st_status write_table(st_inventory *inv, int layer, const char *const *cols,
                             const st_field_type *types, size_t ncols,
                             const char *const *rows, size_t n)
{
    st_fields fields;
    st_fields_init(&fields);
    st_status rc = ST_OK;
    for (size_t c = 0; rc == ST_OK && c < ncols; c++)
        rc = st_fields_add(&fields, cols[c], types[c], 0, 0, NULL);
    st_writer *w = writer_for(inv, layer);
    if (rc == ST_OK)
        rc = st_writer_begin_layer(w, layer_names[layer], &fields, ST_GEOM_NULL);
    st_feature none;
    memset(&none, 0, sizeof none);
    for (size_t k = 0; rc == ST_OK && k < n; k++)
        rc = write_row(w, &none, (char **)(rows + ncols * k), (uint32_t)ncols, 0);
    if (rc == ST_OK)
        rc = st_writer_end_layer(w);
    st_fields_free(&fields);
    return rc;
}

st_status st_inventory_write_run_info(st_inventory *inv, const char *const *kv, size_t n)
{
    static const char *const cols[] = {"key", "value"};
    static const st_field_type types[] = {ST_FIELD_TEXT, ST_FIELD_TEXT};
    return write_table(inv, L_RUN_INFO, cols, types, 2, kv, n);
}

st_status st_inventory_write_unmapped(st_inventory *inv, const char *const *rows, size_t n)
{
    static const char *const cols[] = {"field", "value", "count"};
    static const st_field_type types[] = {ST_FIELD_TEXT, ST_FIELD_TEXT, ST_FIELD_INTEGER};
    return write_table(inv, L_UNMAPPED, cols, types, 3, rows, n);
}

/* The districts layer's columns: ours, then five provenance shares a field. */
static st_status district_fields(const st_audit *a, st_fields *out)
{
    static const char *const cols[] = {
        "district", "region", "buildings", "repaired", "duplicate", "rejected",
        "footprint_m2", "floor_m2", "floor_known", "expected", "ratio", "reference",
        "findings_error", "findings_warning", "findings_note", "polygon_repair"};
    static const st_field_type types[] = {
        ST_FIELD_TEXT, ST_FIELD_TEXT, ST_FIELD_INTEGER, ST_FIELD_INTEGER, ST_FIELD_INTEGER,
        ST_FIELD_INTEGER, ST_FIELD_REAL, ST_FIELD_REAL, ST_FIELD_INTEGER, ST_FIELD_INTEGER,
        ST_FIELD_REAL, ST_FIELD_TEXT, ST_FIELD_INTEGER, ST_FIELD_INTEGER, ST_FIELD_INTEGER,
        ST_FIELD_TEXT};
    st_status rc = ST_OK;
    for (size_t i = 0; rc == ST_OK && i < sizeof cols / sizeof cols[0]; i++)
        rc = st_fields_add(out, cols[i], types[i], 0, 0, NULL);
    for (uint32_t f = 0; rc == ST_OK && f < a->nfields; f++)
        for (int p = ST_NPROV - 1; rc == ST_OK && p >= 0; p--) {
            char *name = st_strdup_printf("%s_%s", a->fields[f],
                                          st_provenance_name((st_provenance)p));
            rc = name ? st_fields_add(out, name, ST_FIELD_REAL, 0, 0, NULL) : ST_ERR_NOMEM;
            st_free(name);
        }
    return rc;
}

#define N_DISTRICT_COLS 16

/* Row k of the districts layer: the audit's district k (borrowed, read
** only). The numbers go into the row's text one after another, each with
** its NUL, and are picked up in that order. */
static st_status fill_district(void *ctx, size_t k, st_row *row)
{
    const st_audit *a = ctx;
    const st_audit_district *d = &a->districts[k];
    st_buf *t = &row->text;
    st_status rc = ST_OK;
    const double nums[] = {(double)d->buildings, (double)d->repaired, (double)d->duplicate,
                           (double)d->rejected, d->footprint_m2, d->floor_m2,
                           (double)d->floor_known, (double)d->expected, d->ratio,
                           (double)d->findings[ST_SEV_ERROR],
                           (double)d->findings[ST_SEV_WARNING],
                           (double)d->findings[ST_SEV_NOTE]};
    static const int decimals[] = {0, 0, 0, 0, 2, 2, 0, 0, 4, 0, 0, 0};
    for (size_t i = 0; i < 12; i++)
        text_num(t, decimals[i], nums[i], &rc);
    for (uint32_t f = 0; f < a->nfields; f++)
        for (int p = ST_NPROV - 1; p >= 0; p--)
            text_num(t, 4,
                     d->buildings ? (double)d->fields[f].by_prov[p] / (double)d->buildings
                                  : 0.0, &rc);
    if (rc != ST_OK)
        return rc;
    char *at[12];
    char *next = t->data;
    for (size_t i = 0; i < 12; i++, next += strlen(next) + 1)
        at[i] = next;
    char **v = row->f.values;
    v[0] = d->key;
    v[1] = d->region;
    for (size_t i = 0; i < 8; i++)
        v[2 + i] = at[i];
    if (d->expected < 0)
        v[9] = NULL;
    v[10] = isnan(d->ratio) ? NULL : at[8];
    v[11] = d->ref == ST_REF_NONE ? NULL : (char *)st_ref_state_name(d->ref);
    for (size_t i = 0; i < 3; i++)
        v[12 + i] = at[9 + i];
    v[15] = d->geom_repair;
    size_t nshare = (size_t)a->nfields * ST_NPROV;
    for (size_t i = 0; i < nshare; i++, next += strlen(next) + 1)
        v[N_DISTRICT_COLS + i] = d->buildings ? next : NULL;
    if (d->geom) {
        row->f.geom = *d->geom;    /* borrowed view; a polygon goes in as a multipolygon */
        if (row->f.geom.type == ST_GEOM_POLYGON)
            row->f.geom.type = ST_GEOM_MULTIPOLYGON;
    }
    return ST_OK;
}

st_status st_inventory_write_districts(st_inventory *inv, const st_audit *a)
{
    if (!inv->multi && !inv->w[L_DISTRICTS]) {
        char *p = st_inventory_sibling_path(inv->path, "districts");
        if (!p)
            return ST_ERR_NOMEM;
        st_status rc = st_writer_open(p, inv->diags, &inv->w[L_DISTRICTS]);
        st_free(p);
        if (rc != ST_OK)
            return rc;
    }
    st_fields fields;
    st_fields_init(&fields);
    st_status rc = district_fields(a, &fields);
    if (rc == ST_OK)
        rc = write_layer(inv, L_DISTRICTS, "districts", &fields, ST_GEOM_MULTIPOLYGON,
                         a->ndistricts, fill_district, (void *)a);
    st_fields_free(&fields);
    return rc;
}

st_status st_inventory_commit(st_inventory *inv)
{
    for (int l = 0; l < L_COUNT; l++) {
        if (!inv->w[l])
            continue;
        st_status rc = st_writer_commit(inv->w[l]);
        if (rc != ST_OK)
            return rc;
    }
    return ST_OK;
}

void st_inventory_close(st_inventory *inv)
{
    if (!inv)
        return;
    for (int l = 0; l < L_COUNT; l++)
        st_writer_close(inv->w[l]);
    for (uint32_t l = 0; l < inv->nlayers; l++) {
        st_free(inv->layer_names ? inv->layer_names[l] : NULL);
        st_free(inv->colmap ? inv->colmap[l] : NULL);
    }
    for (uint32_t s = 0; s < inv->nschema; s++)
        st_free(inv->schema[s]);
    st_free(inv->schema);
    st_free(inv->layer_names);
    st_free(inv->colmap);
    st_free(inv->nfields);
    st_fields_free(&inv->source);
    st_fields_free(&inv->bfields);
    st_fields_free(&inv->sfields);
    st_free(inv->path);
    st_free(inv);
}
