/*
** cli/cmd_inspect.c -- 'stocktake inspect': profile layers before a run.
**
** Input:   one or more layers ("file" or "file.gpkg:layer"), read in their
**          own CRS (keep_source_crs) in one streaming pass each.
** Output:  per layer, on stdout: format, layer name, feature count,
**          geometry types with counts (null and empty apart), CRS, extent
**          in the source CRS and, when PROJ can, in lon/lat WGS 84; per
**          attribute: how often it is filled, how many distinct values it
**          has and its INSPECT_TOP most common values. As text, or with
**          --json as one JSON document described in docs/inspect.md.
** Errors:  a layer that cannot be opened or read, an unknown CRS, a layer
**          without a CRS and without --crs: the library's diagnostic
**          (file and place) on stderr, exit 2, and nothing more is read.
**          With --json nothing is printed on stdout then.
** Limits:  exact distinct-value tracking stops at INSPECT_DISTINCT_MAX
**          values or INSPECT_DISTINCT_BYTES bytes of value text per field;
**          beyond it the distinct count is reported as "more than N", the
**          values already tracked keep being counted exactly, and the
**          occurrences of values seen only after the cap are counted as
**          'untracked'. The top values then rank the tracked values only.
**          The lon/lat extent is the source extent's outline, densified
**          to INSPECT_EDGE_POINTS points a side, transformed: it encloses
**          the data's own lon/lat extent up to the curvature between two
**          points (negligible at footprint scale), and is not exact.
*/
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include <yajl_gen.h>

#include "cli.h"
#include "stocktake/feature.h"
#include "stocktake/io.h"
#include "stocktake/strtab.h"

#define INSPECT_TOP 15
#define INSPECT_DISTINCT_MAX 200000u
#define INSPECT_DISTINCT_BYTES ((size_t)64 << 20)
#define INSPECT_EDGE_POINTS 21
#define INSPECT_TEXT_VALUE_MAX 60   /* bytes of a value shown in text mode */

void st_help_inspect(FILE *out)
{
    fprintf(out,
            "usage: stocktake inspect [--json] [--crs EPSG:N] [-q] FILE...\n"
            "\n"
            "Profile each layer: format, feature count, geometry types (null and\n"
            "empty counted apart), CRS, extent in the layer's CRS and in lon/lat,\n"
            "and for every attribute its fill rate, number of distinct values and\n"
            "its %d most common values. FILE is a .shp, .geojson, .geojsonl or\n"
            ".gpkg file; FILE.gpkg:LAYER picks one table of a GeoPackage.\n"
            "\n"
            "options:\n"
            "  --json          one JSON document on stdout (fields: docs/inspect.md)\n"
            "  --crs EPSG:N    CRS of layers that have none (or to overrule theirs)\n"
            "  -q, --quiet     no progress display\n"
            "  -h, --help      this help\n"
            "\n"
            "Distinct values are tracked exactly up to %u per field; beyond that\n"
            "the count is given as \"more than N\".\n"
            "\n"
            "exit codes: 0 done; 2 usage error, or a layer could not be read\n",
            INSPECT_TOP, INSPECT_DISTINCT_MAX);
}

/* ---- statistics of one layer --------------------------------------------- */

typedef struct field_stats {
    st_strtab *values;      /* distinct filled values, NULL until the first */
    uint64_t *counts;       /* occurrences per value id */
    uint32_t counts_cap;
    uint64_t present;       /* non-null */
    uint64_t filled;        /* non-null and non-empty */
    uint64_t untracked;     /* filled occurrences not tracked (after the cap) */
    int capped;
} field_stats;

typedef struct layer_stats {
    const char *spec;                     /* as given on the command line */
    uint64_t features;
    uint64_t by_type[ST_GEOM_OTHER + 1];  /* non-empty geometries per type */
    uint64_t null_geoms, empty_geoms, with_z, nonfinite;
    double extent[4];
    int has_extent;
    double lonlat[4];
    int has_lonlat;
    char *lonlat_note;                    /* owned; why there is no lon/lat extent */
    field_stats *fields;
    uint32_t nfields;
} layer_stats;

static void layer_stats_free(layer_stats *ls)
{
    for (uint32_t i = 0; i < ls->nfields; i++) {
        st_strtab_free(ls->fields[i].values);
        st_free(ls->fields[i].counts);
    }
    st_free(ls->fields);
    st_free(ls->lonlat_note);
    memset(ls, 0, sizeof *ls);
}

static st_status ensure_fields(layer_stats *ls, uint32_t n)
{
    if (n <= ls->nfields)
        return ST_OK;
    field_stats *f = st_realloc(ls->fields, (size_t)n * sizeof *f);
    if (!f)
        return ST_ERR_NOMEM;
    memset(f + ls->nfields, 0, (size_t)(n - ls->nfields) * sizeof *f);
    ls->fields = f;
    ls->nfields = n;
    return ST_OK;
}

static st_status count_value(field_stats *fs, const char *v)
{
    if (!v)
        return ST_OK;
    fs->present++;
    if (!*v)
        return ST_OK;
    fs->filled++;
    if (!fs->values &&
        !(fs->values = st_strtab_new(INSPECT_DISTINCT_MAX, INSPECT_DISTINCT_BYTES)))
        return ST_ERR_NOMEM;
    uint32_t id;
    st_status rc = st_strtab_intern(fs->values, v, strlen(v), &id, NULL);
    if (rc == ST_ERR_LIMIT) {
        fs->capped = 1;
        fs->untracked++;
        return ST_OK;
    }
    if (rc != ST_OK)
        return rc;
    if (id >= fs->counts_cap) {
        uint32_t cap = fs->counts_cap ? fs->counts_cap * 2 : 64;
        uint64_t *c = st_realloc(fs->counts, (size_t)cap * sizeof *c);
        if (!c)
            return ST_ERR_NOMEM;
        memset(c + fs->counts_cap, 0, (size_t)(cap - fs->counts_cap) * sizeof *c);
        fs->counts = c;
        fs->counts_cap = cap;
    }
    fs->counts[id]++;
    return ST_OK;
}

static void count_geometry(layer_stats *ls, const st_geom *g)
{
    if (g->type == ST_GEOM_NULL) {
        ls->null_geoms++;
        return;
    }
    if (g->has_z)
        ls->with_z++;
    if (g->type != ST_GEOM_OTHER && g->ncoords == 0) {
        ls->empty_geoms++;
        return;
    }
    ls->by_type[g->type <= ST_GEOM_OTHER ? g->type : ST_GEOM_OTHER]++;
    for (uint32_t i = 0; i < g->ncoords; i++) {
        double x = g->xy[2 * i], y = g->xy[2 * i + 1];
        if (!isfinite(x) || !isfinite(y)) {
            ls->nonfinite++;
            continue;
        }
        if (!ls->has_extent) {
            ls->extent[0] = ls->extent[2] = x;
            ls->extent[1] = ls->extent[3] = y;
            ls->has_extent = 1;
        }
        if (x < ls->extent[0]) ls->extent[0] = x;
        if (y < ls->extent[1]) ls->extent[1] = y;
        if (x > ls->extent[2]) ls->extent[2] = x;
        if (y > ls->extent[3]) ls->extent[3] = y;
    }
}

static st_status count_feature(layer_stats *ls, const st_reader *r, const st_feature *f)
{
    ls->features++;
    count_geometry(ls, &f->geom);
    uint32_t nfields = st_reader_fields(r)->count;
    st_status rc = ensure_fields(ls, nfields);
    for (uint32_t i = 0; rc == ST_OK && i < nfields; i++)
        rc = count_value(&ls->fields[i], st_feature_value(f, i));
    return rc;
}

/* ---- lon/lat extent -------------------------------------------------- */

/*
** Prepare the transformation for the lon/lat extent. A definition PROJ
** cannot read is an error (its diagnostic goes to 'diags'); a CRS PROJ
** reads but cannot transform to WGS 84 only leaves a note. *xf NULL and
** *same 1 when the layer already is lon/lat WGS 84.
*/
static st_status prepare_lonlat(layer_stats *ls, const st_reader *r, st_diags *diags,
                                st_crs_transform **xf, int *same)
{
    *xf = NULL;
    *same = 0;
    const char *def = st_reader_crs_def(r);
    if (!def)
        return ST_OK;
    char *known = st_crs_identify(def);
    if (!known)   /* unknown: let st_crs_to_wgs84 say so, naming the file */
        return st_crs_to_wgs84(def, st_reader_path(r), diags, xf);
    st_free(known);
    st_diags scratch;
    st_diags_init(&scratch);
    st_status rc = st_crs_to_wgs84(def, st_reader_path(r), &scratch, xf);
    if (rc == ST_OK)
        *same = *xf == NULL;
    else if (rc == ST_ERR_PROJ) {
        ls->lonlat_note = st_strdup(scratch.count ? scratch.items[0].message
                                                  : "no transformation to WGS 84");
        rc = ls->lonlat_note ? ST_OK : ST_ERR_NOMEM;
    }
    st_diags_free(&scratch);
    return rc;
}

static st_status finish_lonlat(layer_stats *ls, st_crs_transform *xf, int same)
{
    if (!ls->has_extent || ls->lonlat_note)
        return ST_OK;
    if (same) {
        memcpy(ls->lonlat, ls->extent, sizeof ls->lonlat);
        ls->has_lonlat = 1;
        return ST_OK;
    }
    if (!xf)
        return ST_OK;
    enum { N = INSPECT_EDGE_POINTS };
    double pts[4 * N * 2];
    const double *e = ls->extent;
    for (int i = 0; i < N; i++) {
        double t = (double)i / (N - 1);
        double x = e[0] + t * (e[2] - e[0]), y = e[1] + t * (e[3] - e[1]);
        double side[4][2] = {{x, e[1]}, {x, e[3]}, {e[0], y}, {e[2], y}};
        for (int s = 0; s < 4; s++) {
            pts[2 * (s * N + i)] = side[s][0];
            pts[2 * (s * N + i) + 1] = side[s][1];
        }
    }
    size_t failed = 0;
    st_status rc = st_crs_apply(xf, pts, 4 * N, &failed);
    if (rc != ST_OK)
        return rc;
    for (int k = 0; k < 4 * N; k++) {
        double lon = pts[2 * k], lat = pts[2 * k + 1];
        if (!isfinite(lon) || !isfinite(lat))
            continue;
        if (!ls->has_lonlat) {
            ls->lonlat[0] = ls->lonlat[2] = lon;
            ls->lonlat[1] = ls->lonlat[3] = lat;
            ls->has_lonlat = 1;
        }
        ls->lonlat[0] = fmin(ls->lonlat[0], lon);
        ls->lonlat[1] = fmin(ls->lonlat[1], lat);
        ls->lonlat[2] = fmax(ls->lonlat[2], lon);
        ls->lonlat[3] = fmax(ls->lonlat[3], lat);
    }
    if (!ls->has_lonlat)
        ls->lonlat_note = st_strdup("PROJ could not transform the extent");
    return ST_OK;
}

/* ---- one pass over a layer ---------------------------------------------- */

typedef struct inspect_opts {
    int json, quiet;
    const char *crs;
} inspect_opts;

static st_status read_all(st_reader *r, layer_stats *ls, const inspect_opts *o)
{
    st_progress p;
    st_progress_start(&p, st_reader_layer_name(r), o->quiet);
    st_status rc = ST_OK;
    for (;;) {
        st_feature *f = NULL;
        rc = st_reader_next(r, &f);
        if (rc != ST_OK || !f)
            break;
        rc = count_feature(ls, r, f);
        st_feature_free(f);
        if (rc != ST_OK)
            break;
        if ((ls->features & 1023) == 0) {
            long long done, total;
            st_reader_progress(r, &done, &total);
            st_progress_update(&p, done, total, (long long)ls->features);
        }
    }
    st_progress_end(&p);
    return rc;
}

static st_status inspect_layer(st_reader *r, layer_stats *ls, const inspect_opts *o,
                               st_diags *diags)
{
    st_crs_transform *xf = NULL;
    int same = 0;
    st_status rc = prepare_lonlat(ls, r, diags, &xf, &same);
    if (rc == ST_OK)
        rc = read_all(r, ls, o);
    if (rc == ST_OK)
        rc = ensure_fields(ls, st_reader_fields(r)->count);
    if (rc == ST_OK)
        rc = finish_lonlat(ls, xf, same);
    st_crs_free(xf);
    return rc;
}

/* ---- ranking values ----------------------------------------------------- */

typedef struct ranked {
    const char *value;
    size_t len;
    uint64_t count;
} ranked;

/* 1 if a ranks before b: more occurrences first, ties by value bytes. */
static int ranks_before(const ranked *a, const ranked *b)
{
    if (a->count != b->count)
        return a->count > b->count;
    size_t n = a->len < b->len ? a->len : b->len;
    int c = memcmp(a->value, b->value, n);
    return c ? c < 0 : a->len < b->len;
}

/* The field's most common values into top[0..*n), best first. */
static void top_values(const field_stats *fs, ranked top[INSPECT_TOP], int *n)
{
    *n = 0;
    uint32_t count = fs->values ? st_strtab_count(fs->values) : 0;
    for (uint32_t id = 0; id < count; id++) {
        ranked cand;
        cand.value = st_strtab_get(fs->values, id, &cand.len);
        cand.count = fs->counts[id];
        if (*n == INSPECT_TOP && !ranks_before(&cand, &top[INSPECT_TOP - 1]))
            continue;
        int at = *n < INSPECT_TOP ? (*n)++ : INSPECT_TOP - 1;
        while (at > 0 && ranks_before(&cand, &top[at - 1])) {
            top[at] = top[at - 1];
            at--;
        }
        top[at] = cand;
    }
}

static uint32_t distinct_count(const field_stats *fs)
{
    return fs->values ? st_strtab_count(fs->values) : 0;
}

static const char *field_type_name(st_field_type t)
{
    switch (t) {
    case ST_FIELD_INTEGER: return "integer";
    case ST_FIELD_REAL: return "real";
    case ST_FIELD_BOOLEAN: return "boolean";
    case ST_FIELD_JSON: return "json";
    case ST_FIELD_TEXT: break;
    }
    return "text";
}

/* Geometry buckets in report order: most frequent first, ties by name. */
typedef struct geom_bucket {
    const char *name;
    uint64_t count;
} geom_bucket;

static int geom_types(const layer_stats *ls, geom_bucket out[ST_GEOM_OTHER + 1])
{
    int n = 0;
    for (int t = ST_GEOM_POINT; t <= ST_GEOM_OTHER; t++)
        if (ls->by_type[t]) {
            geom_bucket b = {st_geom_type_name((st_geom_type)t), ls->by_type[t]};
            int at = n++;
            while (at > 0 && (out[at - 1].count < b.count ||
                              (out[at - 1].count == b.count &&
                               strcmp(out[at - 1].name, b.name) > 0))) {
                out[at] = out[at - 1];
                at--;
            }
            out[at] = b;
        }
    return n;
}

/* ---- text output ---------------------------------------------------------- */

/* A value on one line: control bytes escaped, cut at a UTF-8 boundary. */
static void print_value(const char *v, size_t n)
{
    size_t show = n > INSPECT_TEXT_VALUE_MAX ? st_utf8_valid_prefix(v, INSPECT_TEXT_VALUE_MAX)
                                             : n;
    for (size_t i = 0; i < show; i++) {
        unsigned char c = (unsigned char)v[i];
        if (c == '\n')
            fputs("\\n", stdout);
        else if (c == '\t')
            fputs("\\t", stdout);
        else if (c < 0x20 || c == 0x7F)
            printf("\\x%02X", c);
        else
            putchar(c);
    }
    if (show < n)
        fputs("...", stdout);
}

static void print_extent(const char *label, const double e[4])
{
    printf("  %-14s %.10g %.10g %.10g %.10g\n", label, e[0], e[1], e[2], e[3]);
}

static double percent(uint64_t part, uint64_t whole)
{
    return whole ? 100.0 * (double)part / (double)whole : 0.0;
}

static void print_field(const layer_stats *ls, const st_field *f, const field_stats *fs)
{
    printf("  field \"%s\" (%s): filled %llu of %llu (%.1f%%)", f->name,
           field_type_name(f->type), (unsigned long long)fs->filled,
           (unsigned long long)ls->features, percent(fs->filled, ls->features));
    uint64_t nulls = ls->features - fs->present, empty = fs->present - fs->filled;
    if (nulls || empty)
        printf(", missing %llu, empty %llu", (unsigned long long)nulls,
               (unsigned long long)empty);
    if (fs->capped)
        printf("; more than %u distinct values (%llu occurrences not tracked)\n",
               distinct_count(fs), (unsigned long long)fs->untracked);
    else
        printf("; %u distinct value%s\n", distinct_count(fs),
               distinct_count(fs) == 1 ? "" : "s");
    ranked top[INSPECT_TOP];
    int n;
    top_values(fs, top, &n);
    if (n == INSPECT_TOP && top[0].count == 1) {
        /* An identifier-like field: fifteen "1" lines would say nothing
        ** (the JSON output still lists them). */
        printf("    %10s  (every value occurs once)\n", "");
        return;
    }
    for (int i = 0; i < n; i++) {
        printf("    %10llu  ", (unsigned long long)top[i].count);
        print_value(top[i].value, top[i].len);
        putchar('\n');
    }
}

static void print_text(const layer_stats *ls, const st_reader *r)
{
    printf("%s\n", ls->spec);
    printf("  %-14s %s\n", "format", st_reader_format_name(r));
    printf("  %-14s %s\n", "layer", st_reader_layer_name(r));
    printf("  %-14s %llu\n", "features", (unsigned long long)ls->features);
    geom_bucket b[ST_GEOM_OTHER + 1];
    int n = geom_types(ls, b);
    printf("  %-14s", "geometry");
    for (int i = 0; i < n; i++)
        printf("%s %s %llu", i ? "," : "", b[i].name, (unsigned long long)b[i].count);
    if (ls->null_geoms || !n)
        printf("%s null %llu", n ? "," : "", (unsigned long long)ls->null_geoms);
    if (ls->empty_geoms)
        printf(", empty %llu", (unsigned long long)ls->empty_geoms);
    putchar('\n');
    if (ls->with_z)
        printf("  %-14s %llu geometries had Z (dropped)\n", "z",
               (unsigned long long)ls->with_z);
    if (ls->nonfinite)
        printf("  %-14s %llu coordinates are not finite numbers\n", "warning",
               (unsigned long long)ls->nonfinite);
    printf("  %-14s %s\n", "crs", st_reader_crs(r) ? st_reader_crs(r) : "?");
    if (ls->has_extent)
        print_extent("extent", ls->extent);
    if (ls->has_lonlat)
        print_extent("extent lon/lat", ls->lonlat);
    else if (ls->lonlat_note)
        printf("  %-14s not available: %s\n", "extent lon/lat", ls->lonlat_note);
    const st_fields *fields = st_reader_fields(r);
    printf("  %-14s %u\n", "fields", fields->count);
    for (uint32_t i = 0; i < fields->count && i < ls->nfields; i++)
        print_field(ls, &fields->items[i], &ls->fields[i]);
}

/* ---- JSON output ---------------------------------------------------------- */

/* yajl_gen with a sticky error flag, so the generator code reads straight. */
typedef struct jw {
    yajl_gen g;
    int bad;
} jw;

static void *jw_malloc(void *ctx, size_t n) { (void)ctx; return st_malloc(n); }
static void *jw_realloc(void *ctx, void *p, size_t n) { (void)ctx; return st_realloc(p, n); }
static void jw_free(void *ctx, void *p) { (void)ctx; st_free(p); }

static void jw_check(jw *w, yajl_gen_status s)
{
    if (s != yajl_gen_status_ok)
        w->bad = 1;
}

static void jw_str(jw *w, const char *s, size_t n)
{
    if (w->bad)
        return;
    char *clean = NULL;
    if (st_utf8_valid_prefix(s, n) != n) {
        if (!(clean = st_utf8_sanitize(s, n))) {
            w->bad = 1;
            return;
        }
        s = clean;
        n = strlen(clean);
    }
    jw_check(w, yajl_gen_string(w->g, (const unsigned char *)s, n));
    st_free(clean);
}

static void jw_key(jw *w, const char *k) { jw_str(w, k, strlen(k)); }

static void jw_kstr(jw *w, const char *k, const char *v)
{
    jw_key(w, k);
    if (v)
        jw_str(w, v, strlen(v));
    else if (!w->bad)
        jw_check(w, yajl_gen_null(w->g));
}

static void jw_kint(jw *w, const char *k, uint64_t v)
{
    jw_key(w, k);
    if (!w->bad)
        jw_check(w, yajl_gen_integer(w->g, (long long)v));
}

/* Shortest "%.*g" that reads back as the same double. */
static void jw_double(jw *w, double v)
{
    char s[32];
    for (int digits = 15; digits <= 17; digits++) {
        snprintf(s, sizeof s, "%.*g", digits, v);
        if (strtod(s, NULL) == v)
            break;
    }
    if (!w->bad)
        jw_check(w, yajl_gen_number(w->g, s, strlen(s)));
}

static void jw_open_map(jw *w) { if (!w->bad) jw_check(w, yajl_gen_map_open(w->g)); }
static void jw_close_map(jw *w) { if (!w->bad) jw_check(w, yajl_gen_map_close(w->g)); }
static void jw_open_array(jw *w) { if (!w->bad) jw_check(w, yajl_gen_array_open(w->g)); }
static void jw_close_array(jw *w) { if (!w->bad) jw_check(w, yajl_gen_array_close(w->g)); }

static void jw_extent(jw *w, const char *k, int has, const double e[4])
{
    jw_key(w, k);
    if (!has) {
        if (!w->bad)
            jw_check(w, yajl_gen_null(w->g));
        return;
    }
    jw_open_array(w);
    for (int i = 0; i < 4; i++)
        jw_double(w, e[i]);
    jw_close_array(w);
}

static void json_field(jw *w, const layer_stats *ls, const st_field *f, const field_stats *fs)
{
    jw_open_map(w);
    jw_kstr(w, "name", f->name);
    jw_kstr(w, "type", field_type_name(f->type));
    jw_kint(w, "present", fs->present);
    jw_kint(w, "filled", fs->filled);
    jw_key(w, "fill_rate");
    jw_double(w, ls->features ? (double)fs->filled / (double)ls->features : 0.0);
    jw_kint(w, "distinct", distinct_count(fs));
    jw_key(w, "distinct_exact");
    if (!w->bad)
        jw_check(w, yajl_gen_bool(w->g, !fs->capped));
    jw_kint(w, "untracked", fs->untracked);
    ranked top[INSPECT_TOP];
    int n;
    top_values(fs, top, &n);
    jw_key(w, "top");
    jw_open_array(w);
    for (int i = 0; i < n; i++) {
        jw_open_map(w);
        jw_key(w, "value");
        jw_str(w, top[i].value, top[i].len);
        jw_kint(w, "count", top[i].count);
        jw_close_map(w);
    }
    jw_close_array(w);
    jw_close_map(w);
}

static void json_layer(jw *w, const layer_stats *ls, const st_reader *r)
{
    jw_open_map(w);
    jw_kstr(w, "file", ls->spec);
    jw_kstr(w, "format", st_reader_format_name(r));
    jw_kstr(w, "layer", st_reader_layer_name(r));
    jw_kint(w, "features", ls->features);
    jw_key(w, "geometry");
    jw_open_map(w);
    geom_bucket b[ST_GEOM_OTHER + 1];
    int n = geom_types(ls, b);
    jw_key(w, "types");
    jw_open_array(w);
    for (int i = 0; i < n; i++) {
        jw_open_map(w);
        jw_kstr(w, "type", b[i].name);
        jw_kint(w, "count", b[i].count);
        jw_close_map(w);
    }
    jw_close_array(w);
    jw_kint(w, "null", ls->null_geoms);
    jw_kint(w, "empty", ls->empty_geoms);
    jw_kint(w, "with_z", ls->with_z);
    jw_kint(w, "nonfinite_coordinates", ls->nonfinite);
    jw_close_map(w);
    jw_kstr(w, "crs", st_reader_crs(r));
    jw_extent(w, "extent", ls->has_extent, ls->extent);
    jw_extent(w, "extent_lonlat", ls->has_lonlat, ls->lonlat);
    if (!ls->has_lonlat && ls->lonlat_note)
        jw_kstr(w, "extent_lonlat_note", ls->lonlat_note);
    jw_key(w, "fields");
    jw_open_array(w);
    const st_fields *fields = st_reader_fields(r);
    for (uint32_t i = 0; i < fields->count && i < ls->nfields; i++)
        json_field(w, ls, &fields->items[i], &ls->fields[i]);
    jw_close_array(w);
    jw_close_map(w);
}

/* ---- the command ------------------------------------------------------------ */

static int parse_args(int argc, char **argv, inspect_opts *o, int *first)
{
    memset(o, 0, sizeof *o);
    int i = 1;
    for (; i < argc && argv[i][0] == '-' && argv[i][1]; i++) {
        const char *a = argv[i];
        if (!strcmp(a, "--")) {
            i++;
            break;
        } else if (!strcmp(a, "--json"))
            o->json = 1;
        else if (!strcmp(a, "-q") || !strcmp(a, "--quiet"))
            o->quiet = 1;
        else if (!strcmp(a, "--crs")) {
            if (++i >= argc)
                return st_cli_usage_error("inspect", "--crs needs a value (EPSG:N)");
            o->crs = argv[i];
        } else if (!strncmp(a, "--crs=", 6))
            o->crs = a + 6;
        else
            return st_cli_usage_error("inspect", "unknown option '%s'", a);
    }
    if (i >= argc)
        return st_cli_usage_error("inspect", "no layer given");
    *first = i;
    return ST_EXIT_OK;
}

/* Open, read and report one layer. Text goes out at once; JSON is added
** to 'w'. Returns ST_OK or the failure (diagnostics in 'diags'). */
static st_status inspect_one(const char *spec, const inspect_opts *o, jw *w,
                             st_diags *diags)
{
    st_read_options ropt = ST_READ_OPTIONS_DEFAULT;
    ropt.crs_override = o->crs;
    ropt.keep_source_crs = 1;
    st_reader *r = NULL;
    st_status rc = st_reader_open(spec, &ropt, diags, &r);
    if (rc != ST_OK)
        return rc;
    layer_stats ls;
    memset(&ls, 0, sizeof ls);
    ls.spec = spec;
    rc = inspect_layer(r, &ls, o, diags);
    if (rc == ST_OK && o->json)
        json_layer(w, &ls, r);
    else if (rc == ST_OK)
        print_text(&ls, r);
    layer_stats_free(&ls);
    st_reader_close(r);
    return rc;
}

int st_cmd_inspect(int argc, char **argv)
{
    inspect_opts o;
    int first = 0;
    if (parse_args(argc, argv, &o, &first) != ST_EXIT_OK)
        return ST_EXIT_ERROR;
    yajl_alloc_funcs af = {jw_malloc, jw_realloc, jw_free, NULL};
    jw w = {NULL, 0};
    if (o.json) {
        w.g = yajl_gen_alloc(&af);
        if (!w.g) {
            fprintf(stderr, "stocktake inspect: out of memory\n");
            return ST_EXIT_ERROR;
        }
        yajl_gen_config(w.g, yajl_gen_beautify, 1);
        yajl_gen_config(w.g, yajl_gen_indent_string, "  ");
        jw_open_map(&w);
        jw_kstr(&w, "stocktake", ST_VERSION);
        jw_key(&w, "layers");
        jw_open_array(&w);
    }
    st_diags diags;
    st_diags_init(&diags);
    st_status rc = ST_OK;
    for (int i = first; rc == ST_OK && i < argc; i++) {
        rc = inspect_one(argv[i], &o, &w, &diags);
        if (rc == ST_OK && !o.json && i + 1 < argc)
            putchar('\n');
    }
    st_cli_print_diags(&diags);
    if (rc == ST_ERR_NOMEM && !diags.errors)
        fprintf(stderr, "stocktake inspect: out of memory\n");
    if (o.json) {
        jw_close_array(&w);
        jw_close_map(&w);
        const unsigned char *buf;
        size_t len;
        if (rc == ST_OK && !w.bad &&
            yajl_gen_get_buf(w.g, &buf, &len) == yajl_gen_status_ok) {
            fwrite(buf, 1, len, stdout);
        } else if (rc == ST_OK) {
            fprintf(stderr, "stocktake inspect: cannot produce the JSON output\n");
            rc = ST_ERR_NOMEM;
        }
        yajl_gen_free(w.g);
    }
    st_diags_free(&diags);
    if (fflush(stdout) != 0 && rc == ST_OK) {
        fprintf(stderr, "stocktake inspect: cannot write to standard output\n");
        return ST_EXIT_ERROR;
    }
    return rc == ST_OK ? ST_EXIT_OK : ST_EXIT_ERROR;
}
