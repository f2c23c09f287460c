/*
** tests/fuzz/fuzz_geojson.c -- fuzz target for the GeoJSON readers
** (io/geojson_read.c): the same bytes are read as a .geojson document and
** as a .geojsonl sequence, so every input exercises both entry points.
**
** Input:   any bytes. Seeds: tests/fuzz/corpus/geojson/ (from tests/data)
**          and, under `make fuzz`, cuts of the real extracts.
** Asserts: the invariants of fuzz.h; crashes, leaks and undefined
**          behaviour are reported by the sanitizers.
*/
#include "fuzz.h"

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
    static const struct {
        const st_reader_format *fmt;
        const char *name;
    } modes[] = {
        {&st_geojson_reader_format, "in.geojson"},
        {&st_geojsonl_reader_format, "in.geojsonl"},
    };
    for (size_t m = 0; m < sizeof modes / sizeof modes[0]; m++) {
        const char *path = fuzz_file(0, modes[m].name, data, size);
        st_diags d;
        st_diags_init(&d);
        st_status rc = fuzz_read_format(modes[m].fmt, path, &d);
        fuzz_check_diags(rc, &d, 1);
        st_diags_free(&d);
    }
    return 0;
}
