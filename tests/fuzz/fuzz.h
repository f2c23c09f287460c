/*
** tests/fuzz/fuzz.h -- what every fuzz harness shares: a private scratch
** folder for the bytes under test, a reader driven through its format
** table, and the invariants a harness asserts on every input.
**
** Input:   the bytes libFuzzer (or the replay driver, replay.c) passes to
**          LLVMFuzzerTestOneInput.
** Output:  nothing; a broken invariant calls abort(), which libFuzzer
**          reports as a crash and the replay test as a failure.
** Invariants asserted (besides what ASan/UBSan catch):
**   - a failing call returns a status other than ST_OK *and* leaves at
**     least one error diagnostic (a failure is never silent);
**   - every error diagnostic of a reader names the file;
**   - every diagnostic renders;
**   - every geometry a reader returns is self-consistent (part, ring and
**     coordinate indexes in range and non-decreasing), so later stages can
**     trust it.
** Limits:  a harness stops after FUZZ_MAX_FEATURES features per input, so
**          one input stays fast; the readers' own limits apply as usual.
**
** Each harness is one .c file that includes this header; the header's
** functions are static so a harness links alone with its driver.
*/
#ifndef STOCKTAKE_FUZZ_H
#define STOCKTAKE_FUZZ_H

#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <dirent.h>
#include <unistd.h>

#include "io/ioInt.h"
#include "stocktake/core.h"
#include "stocktake/feature.h"

#define FUZZ_MAX_FEATURES 2000

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size);

/* Abort with a short reason: the one way a harness reports a bug. */
static inline void fuzz_die(const char *why)
{
    fprintf(stderr, "fuzz invariant broken: %s\n", why);
    abort();
}

static char fuzz_scratch[64];

/* Remove the scratch folder and what is in it (at exit). */
static inline void fuzz_cleanup(void)
{
    DIR *d = opendir(fuzz_scratch);
    if (!d)
        return;
    struct dirent *e;
    char p[512];
    while ((e = readdir(d)) != NULL)
        if (e->d_name[0] != '.') {
            snprintf(p, sizeof p, "%s/%s", fuzz_scratch, e->d_name);
            unlink(p);
        }
    closedir(d);
    rmdir(fuzz_scratch);
}

/* The scratch folder, made once per process (libFuzzer runs one input
** after another in one process) and removed at exit. Memory-backed
** /dev/shm when present. */
static inline const char *fuzz_dir(void)
{
    char *dir = fuzz_scratch;
    if (!dir[0]) {
        const char *base = access("/dev/shm", W_OK) == 0 ? "/dev/shm" : "/tmp";
        snprintf(dir, sizeof fuzz_scratch, "%s/stocktake-fuzz-XXXXXX", base);
        if (!mkdtemp(dir))
            fuzz_die("cannot make a scratch folder");
        atexit(fuzz_cleanup);
    }
    return dir;
}

/* Write data[0..n) to <scratch>/<name>; returns the path (static buffer
** per slot 0..7, so a harness can hold several paths). */
static inline const char *fuzz_file(int slot, const char *name, const void *data, size_t n)
{
    static char paths[8][128];
    char *p = paths[slot & 7];
    snprintf(p, sizeof paths[0], "%s/%s", fuzz_dir(), name);
    FILE *fp = fopen(p, "wb");
    if (!fp || (n && fwrite(data, 1, n, fp) != n) || fclose(fp) != 0)
        fuzz_die("cannot write a scratch file");
    return p;
}

static inline void fuzz_unlink(const char *name)
{
    char p[128];
    snprintf(p, sizeof p, "%s/%s", fuzz_dir(), name);
    unlink(p);
}

/* A failure must come with an error diagnostic, and each diagnostic must
** render; 'need_file': reader errors must also name their file. */
static inline void fuzz_check_diags(st_status rc, const st_diags *d, int need_file)
{
    if (rc != ST_OK && d->errors == 0)
        fuzz_die("a call failed without an error diagnostic");
    if (rc == ST_OK && d->errors != 0 && need_file)
        fuzz_die("an error diagnostic on a call that succeeded");
    st_buf b;
    st_buf_init(&b, 0);
    for (size_t i = 0; i < d->count; i++) {
        const st_diag *g = &d->items[i];
        if (!g->message)
            fuzz_die("a diagnostic without a message");
        if (need_file && g->severity == ST_SEV_ERROR && !g->file)
            fuzz_die("a reader error that does not name the file");
        st_buf_clear(&b);
        if (st_diag_render(g, &b) != ST_OK)
            fuzz_die("a diagnostic that does not render");
    }
    st_buf_free(&b);
}

/* Part, ring and coordinate indexes of 'g' stay in range and in order. */
static inline void fuzz_check_geom(const st_geom *g)
{
    if (g->nparts == 0) {
        if (g->nrings || g->ncoords)
            fuzz_die("rings or coordinates without a part");
        return;
    }
    if (!g->part_ring || (g->nrings && !g->ring_coord) || (g->ncoords && !g->xy))
        fuzz_die("geometry arrays missing");
    if (g->part_ring[0] != 0 || g->part_ring[g->nparts] != g->nrings)
        fuzz_die("part_ring does not span the rings");
    for (uint32_t p = 0; p < g->nparts; p++)
        if (g->part_ring[p] > g->part_ring[p + 1])
            fuzz_die("part_ring decreases");
    if (g->nrings == 0)
        return;
    if (g->ring_coord[0] != 0 || g->ring_coord[g->nrings] != g->ncoords)
        fuzz_die("ring_coord does not span the coordinates");
    for (uint32_t r = 0; r < g->nrings; r++)
        if (g->ring_coord[r] > g->ring_coord[r + 1])
            fuzz_die("ring_coord decreases");
    volatile double sum = 0;   /* touch every coordinate: ASan sees overruns */
    for (uint32_t i = 0; i < 2 * g->ncoords; i++)
        sum += g->xy[i];
    (void)sum;
}

/* Values beyond the layer's fields would be misfiled by writers. */
static inline void fuzz_check_feature(const st_feature *f, const st_fields *fields)
{
    fuzz_check_geom(&f->geom);
    if (f->nvalues > fields->count)
        fuzz_die("a feature with more values than the layer has fields");
    for (uint32_t i = 0; i < f->nvalues; i++)
        if (f->values[i] && st_utf8_valid_prefix(f->values[i], strlen(f->values[i])) !=
                                strlen(f->values[i]))
            fuzz_die("an attribute value that is not valid UTF-8");
}

/*
** Drive one format's table over r->path the way io/reader.c does, minus
** the CRS step (PROJ would dominate the time of each input and is not
** what is under test). Returns the first failing status, or ST_OK.
*/
static inline st_status fuzz_read_format(const st_reader_format *fmt, const char *path,
                                  st_diags *d)
{
    st_reader r;
    memset(&r, 0, sizeof r);
    r.fmt = fmt;
    r.path = st_strdup(path);
    r.diags = d;
    r.opt = ST_READ_OPTIONS_DEFAULT;
    r.count_hint = -1;
    st_fields_init(&r.fields);
    st_status rc = r.path ? fmt->open(&r) : ST_ERR_NOMEM;
    for (int n = 0; rc == ST_OK && n < FUZZ_MAX_FEATURES; n++) {
        st_feature *f = NULL;
        rc = fmt->next(&r, &f);
        if (rc != ST_OK && f)
            fuzz_die("next() failed but returned a feature");
        if (!f)
            break;
        f->index = r.next_index++;
        fuzz_check_feature(f, &r.fields);
        st_feature_free(f);
    }
    fmt->close(&r);
    st_fields_free(&r.fields);
    st_free(r.path);
    st_free(r.layer_request);
    st_free(r.layer_name);
    st_free(r.crs_def);
    st_free(r.crs_name);
    return rc;
}

#endif
