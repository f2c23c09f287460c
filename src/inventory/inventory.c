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
    char **row;                    /* scratch row, borrowed pointers */
    size_t rowcap;
    st_buf scratch;                /* numbers formatted for one row */
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
    size_t need = inv->bfields.count > inv->sfields.count ? inv->bfields.count
                                                          : inv->sfields.count;
    inv->rowcap = need < 8 ? 8 : need;
    inv->row = rc == ST_OK ? st_calloc(inv->rowcap, sizeof *inv->row) : NULL;
    return rc != ST_OK ? rc : inv->row ? ST_OK : ST_ERR_NOMEM;
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
    st_buf_init(&inv->scratch, 0);
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

/* Put a number into the scratch buffer and return where it starts; the
** buffer is cleared once per row, so offsets stay valid for the row. */
static size_t scratch_num(st_inventory *inv, int decimals, double v, st_status *rc)
{
    size_t at = inv->scratch.len;
    char text[ST_FMT_FIXED_MAX];
    size_t n = st_fmt_fixed(text, v, decimals);   /* printf's "%.<decimals>f" */
    if (*rc == ST_OK)
        *rc = st_buf_append(&inv->scratch, text, n + 1);   /* with the NUL */
    return at;
}

static void place_source_values(st_inventory *inv, const st_feature *f, size_t first)
{
    uint32_t l = f->layer < inv->nlayers ? f->layer : 0;
    for (uint32_t i = 0; i < f->nvalues && i < inv->nfields[l]; i++)
        inv->row[first + inv->colmap[l][i]] = f->values[i];
}

static st_status write_row(st_writer *w, const st_feature *f, char **row, uint32_t n,
                           int promote)
{
    st_feature r;
    memset(&r, 0, sizeof r);
    r.geom = f->geom;              /* borrowed view, never freed here */
    /* set_aside keeps the geometry as read, also when a stage replaced it */
    if (!promote && f->source_geom.type != ST_GEOM_NULL)
        r.geom = f->source_geom;
    /* buildings is declared MULTIPOLYGON: a polygon is written as a
    ** one-part multipolygon (same arrays, another type tag). */
    if (promote && r.geom.type == ST_GEOM_POLYGON)
        r.geom.type = ST_GEOM_MULTIPOLYGON;
    r.values = row;
    r.nvalues = n;
    r.source_id = f->source_id;
    r.bid = f->bid;
    return st_writer_write(w, &r);
}

st_status st_inventory_write_buildings(st_inventory *inv, st_feature *const *fs,
                                       size_t n, const char *const *district_names)
{
    st_writer *w = writer_for(inv, L_BUILDINGS);
    st_status rc = st_writer_begin_layer(w, "buildings", &inv->bfields, ST_GEOM_MULTIPOLYGON);
    for (size_t k = 0; rc == ST_OK && k < n; k++) {
        const st_feature *f = fs[k];
        memset(inv->row, 0, inv->rowcap * sizeof *inv->row);
        st_buf_clear(&inv->scratch);
        size_t bid = scratch_num(inv, 0, (double)f->bid, &rc);
        size_t area = scratch_num(inv, 2, f->area_m2, &rc);
        size_t per = scratch_num(inv, 2, f->perimeter_m, &rc);
        size_t flags = inv->scratch.len;
        if (rc == ST_OK)
            rc = st_footprint_flag_names(f->flags, &inv->scratch);
        if (rc == ST_OK)
            rc = st_buf_append(&inv->scratch, "", 1);
        if (rc != ST_OK)
            break;
        inv->row[0] = inv->scratch.data + bid;
        inv->row[1] = inv->layer_names[f->layer < inv->nlayers ? f->layer : 0];
        inv->row[2] = f->source_id;
        inv->row[3] = (char *)st_feature_status_name(f->status);
        inv->row[4] = inv->scratch.data + area;
        inv->row[5] = inv->scratch.data + per;
        inv->row[6] = inv->scratch.data + flags;
        inv->row[7] = (char *)(f->district >= 0 && district_names
                                   ? district_names[f->district] : "none");
        for (uint32_t s = 0; s < inv->nschema && s < f->nschema; s++) {
            inv->row[N_BUILDING_COLS + 3 * s] = f->schema[s].text;
            inv->row[N_BUILDING_COLS + 3 * s + 1] = (char *)st_provenance_name(f->schema[s].from);
            inv->row[N_BUILDING_COLS + 3 * s + 2] = (char *)f->schema[s].rule;
        }
        place_source_values(inv, f, N_BUILDING_COLS + 3 * (size_t)inv->nschema);
        rc = write_row(w, f, inv->row, inv->bfields.count, 1);
    }
    if (rc == ST_OK)
        rc = st_writer_end_layer(w);
    return rc;
}

st_status st_inventory_write_set_aside(st_inventory *inv, st_feature *const *fs, size_t n,
                                      const char *const *district_names)
{
    st_writer *w = writer_for(inv, L_SET_ASIDE);
    st_status rc = st_writer_begin_layer(w, "set_aside", &inv->sfields, ST_GEOM_OTHER);
    for (size_t k = 0; rc == ST_OK && k < n; k++) {
        const st_feature *f = fs[k];
        memset(inv->row, 0, inv->rowcap * sizeof *inv->row);
        st_buf_clear(&inv->scratch);
        size_t bid = scratch_num(inv, 0, (double)f->bid, &rc);
        size_t dup = scratch_num(inv, 0, (double)f->duplicate_of, &rc);
        if (rc != ST_OK)
            break;
        inv->row[0] = inv->scratch.data + bid;
        inv->row[1] = inv->layer_names[f->layer < inv->nlayers ? f->layer : 0];
        inv->row[2] = f->source_id;
        inv->row[3] = (char *)st_feature_status_name(f->status);
        inv->row[4] = f->reason;
        inv->row[5] = f->status == ST_STATUS_DUPLICATE ? inv->scratch.data + dup : NULL;
        inv->row[6] = (char *)(f->district >= 0 && district_names
                                   ? district_names[f->district] : "none");
        place_source_values(inv, f, N_SET_ASIDE_COLS);
        rc = write_row(w, f, inv->row, inv->sfields.count, 0);
    }
    if (rc == ST_OK)
        rc = st_writer_end_layer(w);
    return rc;
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
    st_writer *w = writer_for(inv, L_FINDINGS);
    if (rc == ST_OK)
        rc = st_writer_begin_layer(w, "findings", &fields, ST_GEOM_POINT);
    st_feature point;
    memset(&point, 0, sizeof point);
    for (size_t k = 0; rc == ST_OK && k < fl->count; k++) {
        const st_finding *g = &fl->items[k];
        st_buf_clear(&inv->scratch);
        size_t bid = scratch_num(inv, 0, (double)g->bid, &rc);
        st_geom_clear(&point.geom);
        if (rc == ST_OK && isfinite(g->x) && isfinite(g->y)) {
            point.geom.type = ST_GEOM_POINT;
            rc = st_geom_add_xy(&point.geom, g->x, g->y);
        }
        if (rc != ST_OK)
            break;
        char *row[4] = {inv->scratch.data + bid, (char *)g->code,
                        (char *)st_severity_name(g->severity), g->message};
        point.bid = g->bid;
        rc = write_row(w, &point, row, 4, 0);
    }
    st_geom_clear(&point.geom);
    if (rc == ST_OK)
        rc = st_writer_end_layer(w);
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

static st_status write_district(st_inventory *inv, st_writer *w, const st_audit *a,
                                const st_audit_district *d, char **row, uint32_t ncols)
{
    st_status rc = ST_OK;
    size_t at[N_DISTRICT_COLS];
    const double nums[] = {(double)d->buildings, (double)d->repaired, (double)d->duplicate,
                           (double)d->rejected, d->footprint_m2, d->floor_m2,
                           (double)d->floor_known, (double)d->expected, d->ratio,
                           (double)d->findings[ST_SEV_ERROR],
                           (double)d->findings[ST_SEV_WARNING],
                           (double)d->findings[ST_SEV_NOTE]};
    static const int decimals[] = {0, 0, 0, 0, 2, 2, 0, 0, 4, 0, 0, 0};
    st_buf_clear(&inv->scratch);
    for (size_t i = 0; i < 12; i++)
        at[i] = scratch_num(inv, decimals[i], nums[i], &rc);
    size_t nshare = (size_t)a->nfields * ST_NPROV;
    size_t *sat = st_malloc((nshare ? nshare : 1) * sizeof *sat);
    if (!sat)
        return ST_ERR_NOMEM;
    for (uint32_t f = 0; f < a->nfields; f++)
        for (int p = ST_NPROV - 1; p >= 0; p--)
            sat[(size_t)f * ST_NPROV + (size_t)(ST_NPROV - 1 - p)] =
                scratch_num(inv, 4,
                            d->buildings ? (double)d->fields[f].by_prov[p] / (double)d->buildings
                                         : 0.0, &rc);
    if (rc == ST_OK) {
        memset(row, 0, ncols * sizeof *row);
        row[0] = d->key;
        row[1] = d->region;
        for (size_t i = 0; i < 8; i++)
            row[2 + i] = inv->scratch.data + at[i];
        if (d->expected < 0)
            row[9] = NULL;
        row[10] = isnan(d->ratio) ? NULL : inv->scratch.data + at[8];
        row[11] = d->ref == ST_REF_NONE ? NULL : (char *)st_ref_state_name(d->ref);
        for (size_t i = 0; i < 3; i++)
            row[12 + i] = inv->scratch.data + at[9 + i];
        row[15] = d->geom_repair;
        for (size_t k = 0; k < nshare; k++)
            row[N_DISTRICT_COLS + k] = d->buildings ? inv->scratch.data + sat[k] : NULL;
        st_feature f;
        memset(&f, 0, sizeof f);
        if (d->geom)
            f.geom = *d->geom;     /* borrowed view; write_row promotes a polygon */
        rc = write_row(w, &f, row, ncols, 1);
    }
    st_free(sat);
    return rc;
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
    char **row = rc == ST_OK ? st_calloc(fields.count, sizeof *row) : NULL;
    if (rc == ST_OK && !row)
        rc = ST_ERR_NOMEM;
    st_writer *w = writer_for(inv, L_DISTRICTS);
    if (rc == ST_OK)
        rc = st_writer_begin_layer(w, "districts", &fields, ST_GEOM_MULTIPOLYGON);
    for (size_t i = 0; rc == ST_OK && i < a->ndistricts; i++)
        rc = write_district(inv, w, a, &a->districts[i], row, fields.count);
    if (rc == ST_OK)
        rc = st_writer_end_layer(w);
    st_free(row);
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
    st_free(inv->row);
    st_buf_free(&inv->scratch);
    st_free(inv->path);
    st_free(inv);
}
