/*
** tests/fuzz/fuzz_part.c -- fuzz target for the record a part stores per
** feature (st_feature_decode, part.h): merge reads these from files that
** travelled between machines, so any bytes must decode or be refused.
**
** Input:   one record. Seeds: tests/fuzz/corpus/part/ (records of the demo
**          town's parts: polygons, multipolygons, repaired footprints with
**          their source geometry, null geometries, schema values).
** Asserts: a refused record is ST_ERR_FORMAT (or ST_ERR_NOMEM); a decoded
**          one has a self-consistent geometry and encodes back to exactly
**          the same bytes (the codec accepts only what it writes).
*/
#include "fuzz.h"
#include "stocktake/part.h"
#include "stocktake/strtab.h"

static void check_geom(const st_geom *g)
{
    if (g->nparts == 0)
        return;
    if (g->part_ring[0] != 0 || g->part_ring[g->nparts] != g->nrings)
        fuzz_die("part offsets out of range");
    for (uint32_t p = 0; p < g->nparts; p++)
        if (g->part_ring[p] > g->part_ring[p + 1])
            fuzz_die("part offsets decrease");
    if (g->nrings && (g->ring_coord[0] != 0 || g->ring_coord[g->nrings] != g->ncoords))
        fuzz_die("ring offsets out of range");
    for (uint32_t r = 0; r < g->nrings; r++)
        if (g->ring_coord[r] > g->ring_coord[r + 1])
            fuzz_die("ring offsets decrease");
}

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
    st_strtab *strings = st_strtab_new(0, 0);
    if (!strings)
        fuzz_die("st_strtab_new failed");
    st_feature *f = NULL;
    st_status rc = st_feature_decode(data, size, strings, &f);
    if (rc != ST_OK) {
        if (f || (rc != ST_ERR_FORMAT && rc != ST_ERR_NOMEM))
            fuzz_die("a refused record is not ST_ERR_FORMAT, or left a feature");
    } else {
        check_geom(&f->geom);
        if (f->source_geom)
            check_geom(f->source_geom);
        st_buf b;
        st_buf_init(&b, 0);
        if (st_feature_encode(f, &b) != ST_OK)
            fuzz_die("a decoded record does not encode");
        if (b.len != size || memcmp(b.data, data, size) != 0)
            fuzz_die("a decoded record encodes to other bytes");
        st_buf_free(&b);
        st_feature_free(f);
    }
    st_strtab_free(strings);
    return 0;
}
