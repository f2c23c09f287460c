/*
** tests/fuzz/fuzz_facts.c -- fuzz target for the layer facts file
** (st_facts_read, facts.h): every part of a job split by windows reads it,
** often from a shared folder other hosts write to, so any bytes must read
** or be refused with a diagnostic.
**
** Input:   the file's text. When the first byte is even the harness ends
**          the text with the digest line the writer would add ("sha256
**          HEX" of every byte before it), so the fuzzer reaches the parser
**          of each line rather than stopping at a wrong digest; when odd,
**          the bytes are the whole file. Seeds: tests/fuzz/corpus/facts/
**          (facts of the demo's layers, GeoJSON and GeoPackage; written
**          without their digest line, which the harness adds).
** Asserts: a refused file is ST_ERR_FORMAT, ST_ERR_LIMIT or ST_ERR_NOMEM
**          with an error naming the file; a read one writes back and reads
**          again to the same facts (count, flags, extent, coordinate-less
**          positions) and the same digest.
*/
#include "fuzz.h"
#include "stocktake/facts.h"
#include "stocktake/sha256.h"

static void check_same(const st_facts *a, const st_facts *b)
{
    if (a->n != b->n || strcmp(a->sha256, b->sha256) != 0)
        fuzz_die("facts written back differ in layers or digest");
    for (size_t i = 0; i < a->n; i++) {
        const st_facts_layer *x = &a->layers[i], *y = &b->layers[i];
        if (!st_facts_same_content(x, y) || x->dense != y->dense ||
            x->ncoordless != y->ncoordless || strcmp(x->spec, y->spec) != 0)
            fuzz_die("a layer's facts change when written back");
        for (size_t k = 0; k < x->ncoordless; k++)
            if (x->coordless[k] != y->coordless[k])
                fuzz_die("coordinate-less positions change when written back");
    }
}

static void write_back(st_facts *f)
{
    char path[160];
    snprintf(path, sizeof path, "%s/again.txt", fuzz_dir());
    st_diags d;
    st_diags_init(&d);
    st_status rc = st_facts_write(f, path, &d);
    fuzz_check_diags(rc, &d, 0);
    if (rc == ST_OK) {
        st_facts again;
        memset(&again, 0, sizeof again);
        rc = st_facts_read(path, &again, &d);
        if (rc != ST_OK)
            fuzz_die("facts the writer wrote do not read back");
        check_same(f, &again);
        st_facts_free(&again);
    }
    unlink(path);
    st_diags_free(&d);
}

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
    st_buf text;
    st_buf_init(&text, 0);
    int add_digest = size > 0 && (data[0] & 1) == 0;
    if (size > 0 && st_buf_append(&text, (const char *)data + 1, size - 1) != ST_OK)
        fuzz_die("no memory for the input");
    if (add_digest) {
        char hex[65];
        st_sha256_hex(text.data ? text.data : "", text.len, hex);
        if (st_buf_printf(&text, "sha256 %s\n", hex) != ST_OK)
            fuzz_die("no memory for the input");
    }
    const char *path = fuzz_file(0, "facts.txt", text.data ? text.data : "", text.len);
    st_buf_free(&text);

    st_diags d;
    st_diags_init(&d);
    st_facts f;
    memset(&f, 0, sizeof f);
    st_status rc = st_facts_read(path, &f, &d);
    fuzz_check_diags(rc, &d, 1);
    if (rc != ST_OK && rc != ST_ERR_FORMAT && rc != ST_ERR_LIMIT && rc != ST_ERR_NOMEM)
        fuzz_die("a facts file refused with an unexpected status");
    if (rc == ST_OK)
        write_back(&f);
    st_facts_free(&f);
    st_diags_free(&d);
    return 0;
}
