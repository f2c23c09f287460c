/*
** cli/cmd_tiles.c -- `stocktake tiles -z Z INPUT...`: the web-mercator
** tiles of zoom Z a job over INPUT splits into, one "Z/X/Y" a line, for
** scripts/run-tiles.sh and job arrays (docs/scale.md).
**
** A tile is listed when some footprint's box meets it: the tile that owns
** a building (tile.h) is always among those its box meets, since the
** point that decides lies inside the box. A footprint the footprint stage
** will take for one with latitude and longitude swapped (its centre
** outside the layer's robust extent, the swapped centre inside) is swapped
** back before its owner is decided, so the tiles of its swapped box are
** listed too. Footprints without coordinates are held by every part and
** need no tile of their own.
**
** With --facts FILE it also writes the layer facts of the inputs
** (facts.h) for `run --tile ... --facts FILE`: it reads every input whole
** anyway, so the parts need not.
*/
#include <stdlib.h>
#include <string.h>

#include "cli.h"
#include "stocktake/facts.h"
#include "stocktake/footprint.h"
#include "stocktake/io.h"
#include "stocktake/tile.h"

void st_help_tiles(FILE *out)
{
    fprintf(out,
            "usage: stocktake tiles -z ZOOM [--crs EPSG:N] [--facts FILE] INPUT...\n"
            "\n"
            "Print the web-mercator tiles Z/X/Y of zoom ZOOM that hold footprints of\n"
            "the INPUT layers, one a line in order: the windows of 'stocktake run\n"
            "--tile' for a job too large for one run (docs/scale.md).\n"
            "\n"
            "  --facts FILE   also write the layer facts of the inputs (counts, field\n"
            "                 types, extents, fids) for 'stocktake run --tile ...\n"
            "                 --facts FILE': each part then checks its inputs are\n"
            "                 unchanged and reads a GeoPackage through its R-tree\n"
            "\n"
            "exit: 0 done; 2 error.\n");
}

/* A growing set of tile keys (x << 32 | y), sorted and made unique at the end. */
typedef struct key_list {
    uint64_t *keys;
    size_t n, cap;
} key_list;

static int add_key(key_list *k, uint32_t x, uint32_t y)
{
    if (k->n == k->cap) {
        size_t cap = k->cap ? 2 * k->cap : 1024;
        uint64_t *a = realloc(k->keys, cap * sizeof *a);
        if (!a)
            return 0;
        k->keys = a;
        k->cap = cap;
    }
    k->keys[k->n++] = (uint64_t)x << 32 | y;
    return 1;
}

static int by_key(const void *a, const void *b)
{
    uint64_t x = *(const uint64_t *)a, y = *(const uint64_t *)b;
    return x < y ? -1 : x > y;
}

/* The tiles box b meets (only its last key when it repeats). */
static int add_box(key_list *k, const double b[4], int z)
{
    if (!(b[0] >= -180 && b[2] <= 180 && b[1] >= -90 && b[3] <= 90))
        return 1;
    uint32_t x0, y0, x1, y1;
    st_tile_of(b[0], b[3], z, &x0, &y0);
    st_tile_of(b[2], b[1], z, &x1, &y1);
    for (uint32_t x = x0; x <= x1; x++)
        for (uint32_t y = y0; y <= y1; y++)
            if (k->n == 0 || k->keys[k->n - 1] != ((uint64_t)x << 32 | y))
                if (!add_key(k, x, y))
                    return 0;
    return 1;
}

/* A layer's footprint boxes and centres, kept until its extent is known. */
typedef struct layer_boxes {
    double *box;                 /* 4 per footprint with coordinates */
    double *centre;              /* 2 per footprint */
    size_t n, cap;
} layer_boxes;

static int keep_box(layer_boxes *lb, const st_feature *f)
{
    double b[4], c[2];
    if (!st_geom_bbox(&f->geom, b) || !st_footprint_center(&f->geom, c))
        return 1;
    if (lb->n == lb->cap) {
        size_t cap = lb->cap ? 2 * lb->cap : 4096;
        double *nb = realloc(lb->box, 4 * cap * sizeof *nb);
        if (nb)
            lb->box = nb;
        double *nc = nb ? realloc(lb->centre, 2 * cap * sizeof *nc) : NULL;
        if (!nc)
            return 0;
        lb->centre = nc;
        lb->cap = cap;
    }
    memcpy(lb->box + 4 * lb->n, b, sizeof b);
    memcpy(lb->centre + 2 * lb->n, c, sizeof c);
    lb->n++;
    return 1;
}

static int inside(const st_footprint_extent *e, double x, double y)
{
    return x >= e->xmin && x <= e->xmax && y >= e->ymin && y <= e->ymax;
}

/* Every box's tiles, and the swapped box's for footprints the footprint
** stage will swap back (its test: footprint.c check_swapped). */
static int add_layer(key_list *k, const layer_boxes *lb, int z)
{
    st_footprint_extent e;
    if (st_footprint_extent_compute(lb->centre, lb->n, &e) != ST_OK)
        return 0;
    for (size_t i = 0; i < lb->n; i++) {
        const double *b = lb->box + 4 * i, *c = lb->centre + 2 * i;
        if (!add_box(k, b, z))
            return 0;
        if (e.valid && !inside(&e, c[0], c[1]) && inside(&e, c[1], c[0])) {
            double sw[4] = {b[1], b[0], b[3], b[2]};
            if (!add_box(k, sw, z))
                return 0;
        }
    }
    return 1;
}

/* Read one input: its boxes into k, its facts into *lf. */
static st_status scan_input(const char *path, const char *crs, int z, key_list *k,
                            st_facts_layer *lf, st_diags *d)
{
    st_read_options ro = ST_READ_OPTIONS_DEFAULT;
    ro.crs_override = crs;
    st_reader *r = NULL;
    layer_boxes lb = {NULL, NULL, 0, 0};
    st_facts_scan sc;
    st_facts_scan_begin(&sc, lf);
    st_status rc = st_reader_open(path, &ro, d, &r);
    int gpkg = rc == ST_OK && !strcmp(st_reader_format_name(r), "gpkg");
    while (rc == ST_OK) {
        st_feature *f = NULL;
        rc = st_reader_next(r, &f);
        if (rc != ST_OK || !f)
            break;
        rc = keep_box(&lb, f) ? st_facts_scan_feature(&sc, lf, st_reader_fields(r), f, gpkg)
                              : ST_ERR_NOMEM;
        st_feature_free(f);
    }
    if (rc == ST_OK)
        rc = st_facts_scan_end(&sc, lf, st_reader_fields(r));
    if (rc == ST_OK && !add_layer(k, &lb, z))
        rc = ST_ERR_NOMEM;
    if (rc == ST_OK) {
        lf->spec = st_strdup(path);
        lf->file = st_strdup(st_reader_path(r));
        lf->format = st_strdup(st_reader_format_name(r));
        lf->name = st_strdup(st_reader_layer_name(r));
        lf->crs = st_strdup(st_reader_crs(r) ? st_reader_crs(r) : "");
        rc = lf->spec && lf->file && lf->format && lf->name && lf->crs ? ST_OK : ST_ERR_NOMEM;
    }
    if (rc == ST_OK)
        rc = st_facts_stat(lf, d);
    st_facts_scan_free(&sc);
    free(lb.box);
    free(lb.centre);
    st_reader_close(r);
    return rc;
}

static int read_input(const char *path, const char *crs, int z, key_list *k,
                      st_facts_layer *lf)
{
    st_diags d;
    st_diags_init(&d);
    st_status rc = scan_input(path, crs, z, k, lf, &d);
    st_cli_print_diags(&d);
    st_diags_free(&d);
    if (rc == ST_ERR_NOMEM)
        fprintf(stderr, "stocktake tiles: out of memory\n");
    return rc == ST_OK;
}

static int write_facts(st_facts *facts, const char *path)
{
    st_diags d;
    st_diags_init(&d);
    st_status rc = st_facts_write(facts, path, &d);
    st_cli_print_diags(&d);
    st_diags_free(&d);
    if (rc == ST_ERR_NOMEM)
        fprintf(stderr, "stocktake tiles: out of memory\n");
    return rc == ST_OK;
}

int st_cmd_tiles(int argc, char **argv)
{
    int z = -1;
    const char *crs = NULL, *facts_path = NULL;
    key_list k = {NULL, 0, 0};
    int ok = 1, ninputs = 0;
    for (int i = 1; i < argc && ok; i++) {
        if ((!strcmp(argv[i], "-z") || !strcmp(argv[i], "--zoom")) && i + 1 < argc) {
            char *end = NULL;
            long v = strtol(argv[++i], &end, 10);
            if (!*argv[i] || *end || v < 0 || v > ST_TILE_MAX_ZOOM) {
                free(k.keys);
                return st_cli_usage_error("tiles", "-z takes a zoom from 0 to %d, not '%s'",
                                          ST_TILE_MAX_ZOOM, argv[i]);
            }
            z = (int)v;
        } else if (!strcmp(argv[i], "--crs") && i + 1 < argc)
            crs = argv[++i];
        else if (!strcmp(argv[i], "--facts") && i + 1 < argc)
            facts_path = argv[++i];
        else if (argv[i][0] == '-' && argv[i][1]) {
            free(k.keys);
            return st_cli_usage_error("tiles", "unknown or incomplete option '%s'", argv[i]);
        } else
            ninputs++;
    }
    if (z < 0 || !ninputs) {
        free(k.keys);
        return st_cli_usage_error("tiles", "give a zoom with -z and at least one input layer");
    }
    st_facts facts = {st_calloc((size_t)ninputs, sizeof *facts.layers), 0, ""};
    ok = facts.layers != NULL;
    for (int i = 1; i < argc && ok; i++) {
        if (argv[i][0] == '-' && argv[i][1]) {
            i++;   /* every option here takes a value */
            continue;
        }
        ok = read_input(argv[i], crs, z, &k, &facts.layers[facts.n++]);
    }
    if (ok && facts_path)
        ok = write_facts(&facts, facts_path);
    st_facts_free(&facts);
    if (ok && k.n)
        qsort(k.keys, k.n, sizeof *k.keys, by_key);
    for (size_t i = 0; ok && i < k.n; i++)
        if (i == 0 || k.keys[i] != k.keys[i - 1])
            printf("%d/%u/%u\n", z, (unsigned)(k.keys[i] >> 32), (unsigned)(k.keys[i] & 0xffffffffu));
    free(k.keys);
    return ok ? ST_EXIT_OK : ST_EXIT_ERROR;
}
