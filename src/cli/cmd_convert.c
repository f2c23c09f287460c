/*
** cli/cmd_convert.c -- 'stocktake convert IN OUT': one layer to another
** format, chosen by OUT's extension, in lon/lat WGS 84.
**
** Input:   a layer ("file" or "file.gpkg:layer") read with strict
**          coordinates: a NaN, infinite or out-of-range coordinate, or one
**          PROJ cannot transform, is an error.
** Output:  OUT, written under a temporary name and renamed when complete;
**          the writer's notes (e.g. Shapefile field names shortened) on
**          stderr; a progress line on a terminal unless -q.
** Passes:  the input is read twice. The first pass gathers the fields
**          (GeoJSON has no fixed schema: a field may first appear in the
**          last feature), the geometry types (so OUT declares one type that
**          fits every feature: Polygon alone stays Polygon, Polygon mixed
**          with MultiPolygon becomes MultiPolygon, features that all lack a
**          geometry make an attribute table, no features at all a Polygon
**          layer, mixed kinds a geometry collection) and checks
**          every coordinate, so a bad input fails before OUT is begun. The
**          second pass writes.
** Errors:  any failure prints the library's diagnostic (file and place),
**          exits 2 and leaves no OUT (the writer is closed without
**          commit). OUT naming the same file as IN is refused. SIGINT,
**          SIGTERM and SIGHUP stop the conversion the same way (no OUT, no
**          temporary file), then end the process as the signal would;
**          one that comes once OUT is in place is too late to undo it:
**          the conversion ends as a success.
*/
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>

#include "cli.h"
#include "stocktake/feature.h"
#include "stocktake/io.h"
#include "stocktake/pipeline.h"

void st_help_convert(FILE *out)
{
    fprintf(out,
            "usage: stocktake convert [-q] [--crs EPSG:N] IN OUT\n"
            "\n"
            "Convert one layer to the format of OUT's extension, in lon/lat WGS 84:\n"
            "  .gpkg      GeoPackage          .geojson   GeoJSON (RFC 7946)\n"
            "  .geojsonl  one Feature a line  .shp       Shapefile\n"
            "  .csv       attributes and a 'wkt' geometry column\n"
            "IN is a .shp, .geojson, .geojsonl or .gpkg file (FILE.gpkg:LAYER for\n"
            "one table). Coordinates are checked strictly: a NaN, infinite or\n"
            "out-of-range coordinate stops the conversion. OUT is written under a\n"
            "temporary name and appears only when complete.\n"
            "\n"
            "options:\n"
            "  --crs EPSG:N    CRS of an input that has none (or to overrule it)\n"
            "  --max-memory SIZE  refuse (exit 2) a feature that alone needs more\n"
            "                  memory than SIZE; convert streams, so memory grows\n"
            "                  with the largest feature, not with the file\n"
            "  -q, --quiet     no progress display and no summary line\n"
            "  -h, --help      this help\n"
            "\n"
            "exit codes: 0 done; 2 usage or input error (OUT is not written)\n");
}

typedef struct convert_opts {
    int quiet;
    uint64_t max_memory;     /* --max-memory: bound on one feature's need */
    const char *crs;
    const char *in, *out;
} convert_opts;

static int parse_args(int argc, char **argv, convert_opts *o)
{
    memset(o, 0, sizeof *o);
    const char *pos[2];
    int npos = 0, options = 1;
    for (int i = 1; i < argc; i++) {
        const char *a = argv[i];
        if (options && !strcmp(a, "--"))
            options = 0;
        else if (options && (!strcmp(a, "-q") || !strcmp(a, "--quiet")))
            o->quiet = 1;
        else if (options && !strcmp(a, "--crs")) {
            if (++i >= argc)
                return st_cli_usage_error("convert", "--crs needs a value (EPSG:N)");
            o->crs = argv[i];
        } else if (options && !strcmp(a, "--max-memory")) {
            if (++i >= argc || !st_cli_parse_size(argv[i], &o->max_memory))
                return st_cli_usage_error("convert", "--max-memory takes a size such "
                                          "as 512M or 4G");
        } else if (options && !strncmp(a, "--crs=", 6))
            o->crs = a + 6;
        else if (options && a[0] == '-' && a[1])
            return st_cli_usage_error("convert", "unknown option '%s'", a);
        else if (npos == 2)
            return st_cli_usage_error("convert", "too many arguments ('%s')", a);
        else
            pos[npos++] = a;
    }
    if (npos < 2)
        return st_cli_usage_error("convert", "expected IN and OUT");
    o->in = pos[0];
    o->out = pos[1];
    return ST_EXIT_OK;
}

/* The file part of an input spec: "a.gpkg:layer" -> "a.gpkg" when the
** whole spec is not itself a file (the reader's own rule). Returns owned. */
static char *input_file(const char *spec)
{
    struct stat st;
    const char *colon = strrchr(spec, ':');
    if (colon && stat(spec, &st) != 0)
        return st_strndup(spec, (size_t)(colon - spec));
    return st_strdup(spec);
}

/* 1 if OUT names the same file as IN (compared by device and inode, so
** "./a.gpkg" and "a.gpkg" or a hard link are caught too). */
static int same_file(const char *in_spec, const char *out)
{
    char *in = input_file(in_spec);
    struct stat a, b;
    int same = in && stat(in, &a) == 0 && stat(out, &b) == 0 &&
               a.st_dev == b.st_dev && a.st_ino == b.st_ino;
    if (in && !same)
        same = strcmp(in, out) == 0;
    st_free(in);
    return same;
}

/* ---- pass 1: survey ------------------------------------------------------ */

static st_status check_interrupt(st_diags *diags)
{
    if (!st_cli_interrupted())
        return ST_OK;
    return st_diags_add(diags, ST_SEV_ERROR, ST_ERR_IO, NULL,
                        "interrupted; the output was not written");
}

typedef struct survey {
    st_fields fields;      /* every field, in the order first seen */
    size_t *maxlen;        /* per field: longest value in bytes */
    uint8_t *not_number;   /* per field: a value that is no number was seen */
    uint32_t nmaxlen;
    unsigned types;        /* bit (1 << st_geom_type) per geometry type seen */
    uint64_t features;
    char *layer;           /* owned layer name */
} survey;

static void progress_tick(st_progress *p, const st_reader *r, uint64_t n, uint64_t total)
{
    if ((n & 1023) != 0)
        return;
    long long done, all;
    st_reader_progress(r, &done, &all);
    if (total)
        st_progress_update(p, (long long)n, (long long)total, (long long)n);
    else
        st_progress_update(p, done, all, (long long)n);
}

/* Longest value of each field, so fixed-width formats (the Shapefile's
** .dbf) can size text columns to the data instead of 254 bytes each. */
static st_status measure_values(survey *s, const st_feature *f)
{
    if (f->nvalues > s->nmaxlen) {
        size_t *m = st_realloc(s->maxlen, f->nvalues * sizeof *m);
        if (m)
            s->maxlen = m;
        uint8_t *b = st_realloc(s->not_number, f->nvalues);
        if (b)
            s->not_number = b;
        if (!m || !b)
            return ST_ERR_NOMEM;
        memset(m + s->nmaxlen, 0, (f->nvalues - s->nmaxlen) * sizeof *m);
        memset(b + s->nmaxlen, 0, f->nvalues - s->nmaxlen);
        s->nmaxlen = f->nvalues;
    }
    for (uint32_t i = 0; i < f->nvalues; i++)
        if (f->values[i] && f->values[i][0]) {
            size_t n = strlen(f->values[i]);
            if (n > s->maxlen[i])
                s->maxlen[i] = n;
            char *end;
            strtod(f->values[i], &end);
            if (*end)
                s->not_number[i] = 1;
        }
    return ST_OK;
}

/* Text fields without a width from their source get the longest value seen
** (at least 1, at most the 254 a .dbf allows; longer values are cut by the
** writer, which says so). */
static void size_text_fields(survey *s)
{
    for (uint32_t i = 0; i < s->fields.count; i++) {
        st_field *f = &s->fields.items[i];
        /* GeoJSON types a field by its first value: a later "PB+2" in a
        ** field that began with 2 makes it text, so no value is lost. */
        if ((f->type == ST_FIELD_INTEGER || f->type == ST_FIELD_REAL) &&
            i < s->nmaxlen && s->not_number[i]) {
            f->type = ST_FIELD_TEXT;
            f->width = 0;
        }
        if (f->width > 0 || (f->type != ST_FIELD_TEXT && f->type != ST_FIELD_JSON))
            continue;
        size_t n = i < s->nmaxlen ? s->maxlen[i] : 0;
        f->width = n < 1 ? 1 : n > 254 ? 254 : (int)n;
    }
}

/* convert streams: memory grows with the largest feature, not the file.
** --max-memory bounds that feature's estimated need (the run's estimate,
** pipeline/guard.c), so one absurd feature fails early and cleanly. */
static st_status check_memory(const convert_opts *o, const st_reader *r,
                              const st_feature *f, st_diags *diags)
{
    uint64_t need = st_run_feature_estimate(f);
    if (!o->max_memory || need <= o->max_memory)
        return ST_OK;
    st_loc loc = ST_LOC_FEATURE(st_reader_path(r), (long long)f->index);
    return st_diags_add(diags, ST_SEV_ERROR, ST_ERR_LIMIT, &loc,
                        "this feature alone needs about %llu MiB of memory, more than "
                        "--max-memory allows", (unsigned long long)(need >> 20));
}

static st_status survey_input(const char *in, const st_read_options *ropt,
                              const convert_opts *o, st_diags *diags, survey *s)
{
    st_reader *r = NULL;
    st_status rc = st_reader_open(in, ropt, diags, &r);
    if (rc != ST_OK)
        return rc;
    st_progress p;
    st_progress_start(&p, "reading", o->quiet);
    for (;;) {
        st_feature *f = NULL;
        if ((rc = check_interrupt(diags)) != ST_OK)
            break;
        rc = st_reader_next(r, &f);
        if (rc != ST_OK || !f)
            break;
        if (f->geom.type != ST_GEOM_NULL && f->geom.type != ST_GEOM_OTHER)
            s->types |= 1u << f->geom.type;
        s->features++;
        rc = check_memory(o, r, f, diags);
        if (rc == ST_OK)
            rc = measure_values(s, f);
        st_feature_free(f);
        if (rc != ST_OK)
            break;
        progress_tick(&p, r, s->features, 0);
    }
    st_progress_end(&p);
    if (rc == ST_OK)
        rc = st_fields_copy(&s->fields, st_reader_fields(r));
    if (rc == ST_OK)
        size_text_fields(s);
    if (rc == ST_OK && !(s->layer = st_strdup(st_reader_layer_name(r))))
        rc = ST_ERR_NOMEM;
    st_reader_close(r);
    return rc;
}

/* One declared type that fits every feature (see the file comment). */
static st_geom_type declared_type(unsigned seen)
{
#define BIT(t) (1u << (t))
    static const struct { unsigned single, multi; st_geom_type one, many; } kinds[] = {
        {BIT(ST_GEOM_POLYGON), BIT(ST_GEOM_MULTIPOLYGON), ST_GEOM_POLYGON, ST_GEOM_MULTIPOLYGON},
        {BIT(ST_GEOM_LINESTRING), BIT(ST_GEOM_MULTILINESTRING), ST_GEOM_LINESTRING,
         ST_GEOM_MULTILINESTRING},
        {BIT(ST_GEOM_POINT), BIT(ST_GEOM_MULTIPOINT), ST_GEOM_POINT, ST_GEOM_MULTIPOINT},
    };
#undef BIT
    if (!seen)
        return ST_GEOM_NULL;
    for (size_t k = 0; k < sizeof kinds / sizeof kinds[0]; k++) {
        if (seen == kinds[k].single)
            return kinds[k].one;
        if ((seen & ~(kinds[k].single | kinds[k].multi)) == 0)
            return kinds[k].many;
    }
    return ST_GEOM_COLLECTION;
}

/* ---- pass 2: write --------------------------------------------------------- */

/*
** Maps the second pass's field positions to the survey's. A GeoJSON reader
** numbers fields in the order it meets them, which is the same in both
** passes, so the map is normally the identity and features go through
** untouched; it is kept general so a reader free to number otherwise
** cannot misplace values.
*/
typedef struct field_map {
    int32_t *to;          /* second-pass index -> survey index */
    uint32_t n;
    int identity;
    char **view;          /* values rearranged for one feature (borrowed strings) */
} field_map;

static st_status map_update(field_map *m, const st_fields *now, const st_fields *all)
{
    if (now->count <= m->n)
        return ST_OK;
    int32_t *to = st_realloc(m->to, (size_t)now->count * sizeof *to);
    if (!to)
        return ST_ERR_NOMEM;
    m->to = to;
    for (uint32_t i = m->n; i < now->count; i++) {
        to[i] = st_fields_find(all, now->items[i].name);
        if (to[i] != (int32_t)i)
            m->identity = 0;
    }
    m->n = now->count;
    return ST_OK;
}

static st_status write_mapped(st_writer *w, field_map *m, const st_fields *all,
                              const st_feature *f)
{
    if (m->identity)
        return st_writer_write(w, f);
    if (!m->view && !(m->view = st_calloc(all->count ? all->count : 1, sizeof *m->view)))
        return ST_ERR_NOMEM;
    memset(m->view, 0, (all->count ? all->count : 1) * sizeof *m->view);
    for (uint32_t i = 0; i < f->nvalues && i < m->n; i++)
        if (m->to[i] >= 0)
            m->view[m->to[i]] = f->values[i];
    st_feature copy = *f;
    copy.values = m->view;
    copy.nvalues = all->count;
    return st_writer_write(w, &copy);
}

static st_status write_output(const convert_opts *o, const st_read_options *ropt,
                              const survey *s, st_diags *diags, st_writer *w)
{
    st_reader *r = NULL;
    st_status rc = st_reader_open(o->in, ropt, diags, &r);
    if (rc != ST_OK)
        return rc;
    /* A layer without features gives no hint: declare what a footprint
    ** layer holds rather than an attribute table. */
    st_geom_type type = s->features ? declared_type(s->types) : ST_GEOM_POLYGON;
    rc = st_writer_begin_layer(w, s->layer, &s->fields, type);
    field_map m = {NULL, 0, 1, NULL};
    st_progress p;
    st_progress_start(&p, "writing", o->quiet);
    uint64_t n = 0;
    while (rc == ST_OK && (rc = check_interrupt(diags)) == ST_OK) {
        st_feature *f = NULL;
        rc = st_reader_next(r, &f);
        if (rc != ST_OK || !f)
            break;
        rc = map_update(&m, st_reader_fields(r), &s->fields);
        if (rc == ST_OK)
            rc = write_mapped(w, &m, &s->fields, f);
        st_feature_free(f);
        progress_tick(&p, r, ++n, s->features);
    }
    st_progress_end(&p);
    if (rc == ST_OK && n != s->features) {
        st_loc loc = ST_LOC_FILE(st_reader_path(r));
        rc = st_diags_add(diags, ST_SEV_ERROR, ST_ERR_IO, &loc,
                          "the file changed while it was converted (%llu features, "
                          "then %llu)", (unsigned long long)s->features,
                          (unsigned long long)n);
    }
    if (rc == ST_OK)
        rc = st_writer_end_layer(w);
    st_free(m.to);
    st_free(m.view);
    st_reader_close(r);
    return rc;
}

static void print_notes(const st_writer *w)
{
    const char *notes = st_writer_notes(w);
    while (notes && *notes) {
        size_t n = strcspn(notes, "\n");
        fprintf(stderr, "stocktake convert: note: %.*s\n", (int)n, notes);
        notes += n + (notes[n] == '\n');
    }
}

static st_status convert(const convert_opts *o, st_diags *diags, uint64_t *written)
{
    st_read_options ropt = ST_READ_OPTIONS_DEFAULT;
    ropt.crs_override = o->crs;
    ropt.strict_coords = 1;
    survey s;
    memset(&s, 0, sizeof s);
    st_fields_init(&s.fields);
    st_status rc = survey_input(o->in, &ropt, o, diags, &s);
    st_writer *w = NULL;
    if (rc == ST_OK)
        rc = st_writer_open(o->out, diags, &w);
    if (rc == ST_OK)
        rc = write_output(o, &ropt, &s, diags, w);
    if (rc == ST_OK)
        rc = check_interrupt(diags);   /* the last moment OUT can be held back */
    if (rc == ST_OK)
        rc = st_writer_commit(w);
    if (rc == ST_OK) {
        print_notes(w);
        *written = s.features;
    }
    st_writer_close(w);   /* without a commit: the temporary output goes */
    st_fields_free(&s.fields);
    st_free(s.maxlen);
    st_free(s.not_number);
    st_free(s.layer);
    return rc;
}

int st_cmd_convert(int argc, char **argv)
{
    convert_opts o;
    if (parse_args(argc, argv, &o) != ST_EXIT_OK)
        return ST_EXIT_ERROR;
    if (!st_writer_supports(o.out))
        return st_cli_usage_error("convert", "cannot tell the output format of '%s' "
                                  "(use .gpkg, .geojson, .geojsonl, .shp or .csv)", o.out);
    if (same_file(o.in, o.out))
        return st_cli_usage_error("convert", "OUT '%s' is the input itself; "
                                  "inputs are never modified", o.out);
    st_diags diags;
    st_diags_init(&diags);
    uint64_t written = 0;
    st_cli_catch_interrupts();
    st_status rc = convert(&o, &diags, &written);
    st_cli_print_diags(&diags);
    if (rc != ST_OK)
        st_cli_reraise();   /* a signal after OUT is in place undoes nothing */
    if (rc != ST_OK && !diags.errors)
        fprintf(stderr, "stocktake convert: %s: %s\n", o.out,
                rc == ST_ERR_NOMEM ? "out of memory" : st_status_name(rc));
    st_diags_free(&diags);
    if (rc != ST_OK)
        return ST_EXIT_ERROR;
    if (!o.quiet)
        fprintf(stderr, "stocktake convert: %llu features written to %s\n",
                (unsigned long long)written, o.out);
    return ST_EXIT_OK;
}
