/*
** tests/fuzz/fuzz_shp.c -- fuzz target for the Shapefile reader (io/shp.c,
** over Shapelib): one input holds the bytes of the .shp, .shx, .dbf, .prj
** and .cpg files, in that order, separated by the 8 bytes FUZZ_SEP. A part
** that is missing (fewer separators) means the file is absent, so the
** reader's "missing sidecar" paths are reached too.
**
** Input:   any bytes. Seeds: tests/fuzz/corpus/shp/ (made by
**          tests/fuzz/mkseeds.sh from tests/data through `stocktake
**          convert`) and, under `make fuzz`, cuts of the real extracts.
** Asserts: the invariants of fuzz.h; sanitizers do the rest.
*/
#include "fuzz.h"

#define FUZZ_SEP "\n#STSEP#"
#define FUZZ_SEP_LEN 8

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
    static const char *const names[] = {"in.shp", "in.shx", "in.dbf", "in.prj", "in.cpg"};
    const size_t nnames = sizeof names / sizeof names[0];
    const uint8_t *p = data, *end = data + size;
    size_t k = 0;
    for (; k < nnames; k++) {
        const uint8_t *cut = NULL;
        for (const uint8_t *q = p; q + FUZZ_SEP_LEN <= end; q++)
            if (!memcmp(q, FUZZ_SEP, FUZZ_SEP_LEN)) {
                cut = q;
                break;
            }
        const uint8_t *stop = cut ? cut : end;
        fuzz_file(k, names[k], p, (size_t)(stop - p));
        if (!cut) {
            k++;
            break;
        }
        p = cut + FUZZ_SEP_LEN;
    }
    for (; k < nnames; k++)
        fuzz_unlink(names[k]);
    st_diags d;
    st_diags_init(&d);
    char path[128];
    snprintf(path, sizeof path, "%s/in.shp", fuzz_dir());
    st_status rc = fuzz_read_format(&st_shp_reader_format, path, &d);
    fuzz_check_diags(rc, &d, 1);
    st_diags_free(&d);
    return 0;
}
