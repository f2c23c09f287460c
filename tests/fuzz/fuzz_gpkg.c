/*
** tests/fuzz/fuzz_gpkg.c -- fuzz target for GeoPackage geometry blobs and
** the WKB inside them (io/gpkg_blob.c): st_gpkg_blob_decode on the input
** as a whole blob, then on a well-formed header followed by the input, so
** every input also reaches the WKB walk directly.
**
** Input:   any bytes. Seeds: tests/fuzz/corpus/gpkg/ (blobs the project's
**          own encoder makes of tests/data shapes, tests/fuzz/mkseeds_gpkg.sh)
**          and, under `make fuzz`, blobs of the real GeoPackage.
** Asserts: the invariants of fuzz.h on each decoded geometry; a failure
**          comes with a reason; a decoded geometry encodes again and
**          decodes to the same coordinates (round trip).
*/
#include "fuzz.h"
#include "stocktake/geomx.h"

static st_geos *gx_once(void)
{
    static st_geos *gx;
    if (!gx && !(gx = st_geos_new()))
        fuzz_die("st_geos_new failed");
    return gx;
}

static void round_trip(const st_geom *g)
{
    if (g->type == ST_GEOM_NULL || g->type == ST_GEOM_OTHER)
        return;
    st_buf b;
    st_buf_init(&b, 0);
    double env[4];
    int has_env = 0;
    st_status rc = st_gpkg_blob_encode(g, 4326, &b, env, &has_env);
    if (rc == ST_OK) {
        st_geom back;
        st_geom_init(&back);
        char err[256] = "";
        rc = st_gpkg_blob_decode(gx_once(), (const unsigned char *)b.data, b.len, &back,
                                 err, sizeof err);
        if (rc != ST_OK) {
            fprintf(stderr, "re-decode: %s\n", err);
            fuzz_die("a blob our encoder wrote does not decode");
        }
        if (back.ncoords != g->ncoords ||
            (g->ncoords && memcmp(back.xy, g->xy, 2 * sizeof(double) * g->ncoords) != 0))
            fuzz_die("encode + decode changed the coordinates");
        st_geom_clear(&back);
    } else if (rc != ST_ERR_LIMIT) {
        fuzz_die("encoding a decoded geometry failed");
    }
    st_buf_free(&b);
}

static void decode(const unsigned char *b, size_t n)
{
    st_geom g;
    st_geom_init(&g);
    char err[256] = "";
    st_status rc = st_gpkg_blob_decode(gx_once(), b, n, &g, err, sizeof err);
    if (rc == ST_OK) {
        fuzz_check_geom(&g);
        round_trip(&g);
    } else if (g.type != ST_GEOM_NULL || g.nparts) {
        fuzz_die("a failed decode left a geometry");
    } else if (rc == ST_ERR_FORMAT && !err[0]) {
        fuzz_die("a format error without a reason");
    }
    st_geom_clear(&g);
}

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
    decode(data, size);
    /* "GP", version 0, flags: little-endian, no envelope; srs_id 4326. */
    static const unsigned char header[8] = {'G', 'P', 0, 1, 0xE6, 0x10, 0, 0};
    unsigned char *b = malloc(sizeof header + size);
    if (!b)
        fuzz_die("out of memory");
    memcpy(b, header, sizeof header);
    if (size)
        memcpy(b + sizeof header, data, size);
    decode(b, sizeof header + size);
    free(b);
    return 0;
}
