/*
** facts/facts.c -- the layer facts of a job split by windows (facts.h):
** gathered while a layer is read, written to and read from a text file.
**
** The file, one "key value" a line (strings percent-encoded: '%', bytes
** up to a space and from 0x7f as %XX):
**
**     stocktake-facts 1
**     layers N
**     layer                       (N times, each with the lines below)
**     spec S / file S / size N / mtime SEC NSEC / format S / name S / crs S
**     count N
**     fields N FLAGS              (FLAGS: one 0 or 1 per field; "-" for none)
**     extent VALID XMIN YMIN XMAX YMAX      (%.17g: read back exactly)
**     fids dense FID_MIN | fids none
**     coordless K POS...          (rising positions)
**     end
**     sha256 HEX                  (of every byte before this line)
**
** Errors:  ST_ERR_IO (cannot read, write or rename), ST_ERR_FORMAT (line
**          named), ST_ERR_LIMIT (above ST_FACTS_MAX_BYTES), ST_ERR_NOMEM.
** Limits:  the whole file is held in memory while it is read.
*/
#include <errno.h>
#include <inttypes.h>
#include <limits.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>

#include "stocktake/facts.h"
#include "stocktake/sha256.h"

#define FACTS_MAGIC "stocktake-facts 1"

void st_facts_layer_free(st_facts_layer *l)
{
    if (!l)
        return;
    st_free(l->spec);
    st_free(l->file);
    st_free(l->format);
    st_free(l->name);
    st_free(l->crs);
    st_free(l->text);
    st_free(l->coordless);
    memset(l, 0, sizeof *l);
}

void st_facts_free(st_facts *f)
{
    if (!f)
        return;
    for (size_t i = 0; i < f->n; i++)
        st_facts_layer_free(&f->layers[i]);
    st_free(f->layers);
    memset(f, 0, sizeof *f);
}

/* ---- gathering ----------------------------------------------------------- */

void st_facts_scan_begin(st_facts_scan *sc, st_facts_layer *l)
{
    memset(sc, 0, sizeof *sc);
    memset(l, 0, sizeof *l);
}

void st_facts_scan_free(st_facts_scan *sc)
{
    st_free(sc->centres);
    memset(sc, 0, sizeof *sc);
}

/* GeoJSON types a field by its first value: a later "PB+2" in a field that
** began with 2 makes it text, so that the inventory does not declare a
** number column for it (GDAL reads such a value back as 0). */
static st_status note_text_values(st_facts_layer *l, const st_fields *fl, const st_feature *f)
{
    for (uint32_t k = 0; k < f->nvalues && k < fl->count; k++) {
        const st_field *fd = &fl->items[k];
        const char *v = f->values[k];
        if ((fd->type != ST_FIELD_INTEGER && fd->type != ST_FIELD_REAL) || !v || !*v)
            continue;
        char *end;
        (void)strtod(v, &end);
        if (!*end)
            continue;
        if (k >= l->nfields) {
            uint8_t *t = st_realloc(l->text, fl->count);
            if (!t)
                return ST_ERR_NOMEM;
            memset(t + l->nfields, 0, fl->count - l->nfields);
            l->text = t;
            l->nfields = fl->count;
        }
        l->text[k] = 1;
    }
    return ST_OK;
}

/* Every feature's centre, for the robust extent: 16 bytes a feature. */
static st_status note_centre(st_facts_scan *sc, const st_feature *f)
{
    double c[2];
    if (!st_footprint_center(&f->geom, c))
        return ST_OK;
    if (sc->n == sc->cap) {
        size_t cap = sc->cap ? 2 * sc->cap : 4096;
        double *a = st_realloc(sc->centres, 2 * cap * sizeof *a);
        if (!a)
            return ST_ERR_NOMEM;
        sc->centres = a;
        sc->cap = cap;
    }
    sc->centres[2 * sc->n] = c[0];
    sc->centres[2 * sc->n + 1] = c[1];
    sc->n++;
    return ST_OK;
}

/* A feature an R-tree may not find where the part looks: no coordinates,
** or a box that is not finite (a point PROJ could not transform). */
static st_status note_coordless(st_facts_layer *l, const st_feature *f)
{
    double b[4];
    if (st_geom_bbox(&f->geom, b) && isfinite(b[0]) && isfinite(b[1]) && isfinite(b[2]) &&
        isfinite(b[3]))
        return ST_OK;
    if (l->ncoordless == l->capcoordless) {
        size_t cap = l->capcoordless ? 2 * l->capcoordless : 16;
        uint64_t *a = st_realloc(l->coordless, cap * sizeof *a);
        if (!a)
            return ST_ERR_NOMEM;
        l->coordless = a;
        l->capcoordless = cap;
    }
    l->coordless[l->ncoordless++] = f->index;
    return ST_OK;
}

/* Dense fids: the first row's fid, and every later one that far on. */
static void note_fid(st_facts_layer *l, const st_feature *f, int gpkg)
{
    char *end = NULL;
    long long fid = gpkg && f->source_id ? strtoll(f->source_id, &end, 10) : 0;
    int ok = gpkg && end && end != f->source_id && !*end;
    if (l->count == 0) {
        l->dense = ok && f->index == 0;
        l->fid_min = ok ? fid : 0;
    } else if (l->dense && (!ok || fid != l->fid_min + (int64_t)f->index)) {
        l->dense = 0;
        l->fid_min = 0;
    }
}

st_status st_facts_scan_feature(st_facts_scan *sc, st_facts_layer *l, const st_fields *fl,
                                const st_feature *f, int gpkg)
{
    note_fid(l, f, gpkg);
    st_status rc = note_text_values(l, fl, f);
    if (rc == ST_OK)
        rc = note_centre(sc, f);
    if (rc == ST_OK)
        rc = note_coordless(l, f);
    if (rc == ST_OK)
        l->count++;
    return rc;
}

st_status st_facts_scan_end(st_facts_scan *sc, st_facts_layer *l, const st_fields *fl)
{
    st_status rc = ST_OK;
    if (fl->count > l->nfields) {
        uint8_t *t = st_realloc(l->text, fl->count);
        if (t) {
            memset(t + l->nfields, 0, fl->count - l->nfields);
            l->text = t;
            l->nfields = fl->count;
        } else {
            rc = ST_ERR_NOMEM;
        }
    }
    if (rc == ST_OK)
        rc = st_footprint_extent_compute(sc->centres, sc->n, &l->extent);
    st_facts_scan_free(sc);
    return rc;
}

st_status st_facts_stat(st_facts_layer *l, st_diags *diags)
{
    struct stat st;
    if (stat(l->file, &st) != 0) {
        st_loc loc = ST_LOC_FILE(l->file);
        return st_diags_add(diags, ST_SEV_ERROR, ST_ERR_IO, &loc, "cannot examine: %s",
                            strerror(errno));
    }
    l->size = (long long)st.st_size;
    l->mtime_s = (long long)st.st_mtim.tv_sec;
    l->mtime_ns = (long long)st.st_mtim.tv_nsec;
    return ST_OK;
}

static int same_extent(const st_footprint_extent *a, const st_footprint_extent *b)
{
    if (a->valid != b->valid)
        return 0;
    return !a->valid || (a->xmin == b->xmin && a->ymin == b->ymin && a->xmax == b->xmax &&
                         a->ymax == b->ymax);
}

/* Text flags compare as if both lists ran on with zeros. */
static int same_flags(const st_facts_layer *a, const st_facts_layer *b)
{
    uint32_t n = a->nfields > b->nfields ? a->nfields : b->nfields;
    for (uint32_t k = 0; k < n; k++) {
        int x = k < a->nfields && a->text[k], y = k < b->nfields && b->text[k];
        if (x != y)
            return 0;
    }
    return 1;
}

int st_facts_same_content(const st_facts_layer *a, const st_facts_layer *b)
{
    return a->count == b->count && same_flags(a, b) && same_extent(&a->extent, &b->extent);
}

/* ---- writing ------------------------------------------------------------- */

static st_status put_string(st_buf *b, const char *key, const char *s)
{
    st_status rc = st_buf_printf(b, "%s ", key);
    for (const unsigned char *p = (const unsigned char *)s; rc == ST_OK && *p; p++)
        rc = *p == '%' || *p <= 0x20 || *p >= 0x7f ? st_buf_printf(b, "%%%02X", *p)
                                                   : st_buf_append(b, (const char *)p, 1);
    return rc == ST_OK ? st_buf_puts(b, "\n") : rc;
}

static st_status put_flags(st_buf *b, const st_facts_layer *l)
{
    st_status rc = st_buf_printf(b, "fields %u ", l->nfields);
    for (uint32_t k = 0; rc == ST_OK && k < l->nfields; k++)
        rc = st_buf_puts(b, l->text[k] ? "1" : "0");
    return rc == ST_OK ? st_buf_puts(b, l->nfields ? "\n" : "-\n") : rc;
}

static st_status put_layer(st_buf *b, const st_facts_layer *l)
{
    const st_footprint_extent *e = &l->extent;
    st_status rc = st_buf_puts(b, "layer\n");
    if (rc == ST_OK)
        rc = put_string(b, "spec", l->spec);
    if (rc == ST_OK)
        rc = put_string(b, "file", l->file);
    if (rc == ST_OK)
        rc = st_buf_printf(b, "size %lld\nmtime %lld %lld\n", l->size, l->mtime_s, l->mtime_ns);
    if (rc == ST_OK)
        rc = put_string(b, "format", l->format);
    if (rc == ST_OK)
        rc = put_string(b, "name", l->name);
    if (rc == ST_OK)
        rc = put_string(b, "crs", l->crs ? l->crs : "");
    if (rc == ST_OK)
        rc = st_buf_printf(b, "count %" PRIu64 "\n", l->count);
    if (rc == ST_OK)
        rc = put_flags(b, l);
    if (rc == ST_OK)
        rc = st_buf_printf(b, "extent %d %.17g %.17g %.17g %.17g\n", e->valid ? 1 : 0,
                           e->valid ? e->xmin : 0, e->valid ? e->ymin : 0,
                           e->valid ? e->xmax : 0, e->valid ? e->ymax : 0);
    if (rc == ST_OK)
        rc = l->dense ? st_buf_printf(b, "fids dense %" PRId64 "\n", l->fid_min)
                      : st_buf_puts(b, "fids none\n");
    if (rc == ST_OK)
        rc = st_buf_printf(b, "coordless %zu", l->ncoordless);
    for (size_t i = 0; rc == ST_OK && i < l->ncoordless; i++)
        rc = st_buf_printf(b, " %" PRIu64, l->coordless[i]);
    return rc == ST_OK ? st_buf_puts(b, "\nend\n") : rc;
}

static st_status write_fail(const char *path, st_diags *diags, const char *doing)
{
    st_loc loc = ST_LOC_FILE(path);
    return st_diags_add(diags, ST_SEV_ERROR, ST_ERR_IO, &loc, "cannot %s: %s", doing,
                        strerror(errno));
}

static st_status write_text(const char *path, const char *tmp, const st_buf *b,
                            st_diags *diags)
{
    FILE *out = fopen(tmp, "wb");
    if (!out)
        return write_fail(path, diags, "write");
    int ok = fwrite(b->data, 1, b->len, out) == b->len;
    ok = fclose(out) == 0 && ok;
    if (!ok || rename(tmp, path) != 0) {
        st_status rc = write_fail(path, diags, ok ? "rename into place" : "write");
        remove(tmp);
        return rc;
    }
    return ST_OK;
}

st_status st_facts_write(st_facts *f, const char *path, st_diags *diags)
{
    st_buf b;
    st_buf_init(&b, 0);
    st_status rc = st_buf_printf(&b, FACTS_MAGIC "\nlayers %zu\n", f->n);
    for (size_t i = 0; rc == ST_OK && i < f->n; i++)
        rc = put_layer(&b, &f->layers[i]);
    if (rc == ST_OK) {
        st_sha256_hex(b.data, b.len, f->sha256);
        rc = st_buf_printf(&b, "sha256 %s\n", f->sha256);
    }
    char *tmp = rc == ST_OK ? st_strdup_printf("%s.tmp-%ld", path, (long)getpid()) : NULL;
    if (rc == ST_OK && !tmp)
        rc = ST_ERR_NOMEM;
    if (rc == ST_OK)
        rc = write_text(path, tmp, &b, diags);
    st_free(tmp);
    st_buf_free(&b);
    return rc;
}

/* ---- reading ------------------------------------------------------------- */

typedef struct cursor {
    const char *path;
    char *text;                  /* the file, NUL-terminated; lines cut */
    size_t len, pos;
    long line;
    st_diags *diags;
    char digest[65];             /* of the bytes before the last line */
} cursor;

static st_status bad(cursor *c, const char *fmt, const char *what)
{
    st_loc loc = ST_LOC_LINE(c->path, c->line, 0, 0);
    return st_diags_add(c->diags, ST_SEV_ERROR, ST_ERR_FORMAT, &loc,
                        "not a valid facts file (stocktake tiles --facts): %s%s", fmt, what);
}

/* The next line, which must start with "key " (or be "key"): its value. */
static st_status take(cursor *c, const char *key, char **value)
{
    if (c->pos >= c->len)
        return c->line++, bad(c, "the file ends early; expected ", key);
    char *line = c->text + c->pos;
    char *nl = memchr(line, '\n', c->len - c->pos);
    if (!nl)
        return c->line++, bad(c, "the last line is cut short; expected ", key);
    *nl = '\0';
    c->pos = (size_t)(nl - c->text) + 1;
    c->line++;
    size_t k = strlen(key);
    if (strlen(line) != (size_t)(nl - line))
        return bad(c, "a NUL byte in the line", "");
    if (strncmp(line, key, k) != 0 || (line[k] != ' ' && line[k] != '\0'))
        return bad(c, "expected a line ", key);
    *value = line[k] ? line + k + 1 : line + k;
    return ST_OK;
}

static int hexval(char ch)
{
    return ch >= '0' && ch <= '9' ? ch - '0' : ch >= 'A' && ch <= 'F' ? ch - 'A' + 10 : -1;
}

static st_status take_string(cursor *c, const char *key, char **out)
{
    char *v;
    st_status rc = take(c, key, &v);
    if (rc != ST_OK)
        return rc;
    char *s = st_malloc(strlen(v) + 1), *w = s;
    if (!s)
        return ST_ERR_NOMEM;
    for (const char *p = v; *p; p++) {
        if ((unsigned char)*p <= 0x20 || (unsigned char)*p >= 0x7f) {
            st_free(s);
            return bad(c, "an unencoded byte in ", key);
        }
        if (*p == '%') {
            int hi = hexval(p[1]), lo = hi < 0 ? -1 : hexval(p[2]);
            if (lo < 0 || (hi == 0 && lo == 0)) {
                st_free(s);
                return bad(c, "a bad %XX escape in ", key);
            }
            *w++ = (char)(hi * 16 + lo);
            p += 2;
        } else {
            *w++ = *p;
        }
    }
    *w = '\0';
    *out = s;
    return ST_OK;
}

/* A whole number in [lo, hi] from *p (then past it and one space, or at
** the end). */
static int parse_ll(char **p, long long lo, long long hi, long long *out)
{
    char *end;
    if (**p != '-' && (**p < '0' || **p > '9'))
        return 0;
    errno = 0;
    long long v = strtoll(*p, &end, 10);
    if (errno || end == *p || v < lo || v > hi || (*end != ' ' && *end != '\0'))
        return 0;
    *p = *end ? end + 1 : end;
    *out = v;
    return 1;
}

static int parse_u64(char **p, uint64_t *out)
{
    char *end;
    if (**p < '0' || **p > '9')
        return 0;
    errno = 0;
    unsigned long long v = strtoull(*p, &end, 10);
    if (errno || (*end != ' ' && *end != '\0'))
        return 0;
    *p = *end ? end + 1 : end;
    *out = v;
    return 1;
}

static int parse_double(char **p, double *out)
{
    char *end;
    double v = strtod(*p, &end);
    if (end == *p || !isfinite(v) || (*end != ' ' && *end != '\0'))
        return 0;
    *p = *end ? end + 1 : end;
    *out = v;
    return 1;
}

static st_status take_number(cursor *c, const char *key, long long lo, long long hi,
                             long long *out)
{
    char *v;
    st_status rc = take(c, key, &v);
    if (rc == ST_OK && (!parse_ll(&v, lo, hi, out) || *v))
        rc = bad(c, "a bad number in ", key);
    return rc;
}

static st_status take_identity(cursor *c, st_facts_layer *l)
{
    char *v;
    st_status rc = take_number(c, "size", 0, LLONG_MAX, &l->size);
    if (rc == ST_OK)
        rc = take(c, "mtime", &v);
    if (rc == ST_OK && (!parse_ll(&v, LLONG_MIN, LLONG_MAX, &l->mtime_s) ||
                        !parse_ll(&v, 0, 999999999, &l->mtime_ns) || *v))
        rc = bad(c, "a bad time in ", "mtime");
    return rc;
}

static st_status take_flags(cursor *c, st_facts_layer *l)
{
    char *v;
    long long n = 0;
    st_status rc = take(c, "fields", &v);
    if (rc == ST_OK && !parse_ll(&v, 0, UINT32_MAX, &n))
        rc = bad(c, "a bad count in ", "fields");
    if (rc == ST_OK && (n ? strlen(v) != (size_t)n || strspn(v, "01") != (size_t)n
                          : strcmp(v, "-") != 0))
        rc = bad(c, "the flags do not match the field count in ", "fields");
    if (rc == ST_OK && n && !(l->text = st_malloc((size_t)n)))
        rc = ST_ERR_NOMEM;
    for (long long k = 0; rc == ST_OK && k < n; k++)
        l->text[k] = v[k] == '1';
    l->nfields = (uint32_t)n;
    return rc;
}

static st_status take_extent(cursor *c, st_facts_layer *l)
{
    char *v;
    long long valid = 0;
    st_footprint_extent *e = &l->extent;
    st_status rc = take(c, "extent", &v);
    if (rc == ST_OK && (!parse_ll(&v, 0, 1, &valid) || !parse_double(&v, &e->xmin) ||
                        !parse_double(&v, &e->ymin) || !parse_double(&v, &e->xmax) ||
                        !parse_double(&v, &e->ymax) || *v))
        rc = bad(c, "bad values in ", "extent");
    e->valid = (int)valid;
    if (rc == ST_OK && valid && (e->xmin > e->xmax || e->ymin > e->ymax))
        rc = bad(c, "an empty box in ", "extent");
    return rc;
}

static st_status take_fids(cursor *c, st_facts_layer *l)
{
    char *v;
    long long fid_min = 0;
    st_status rc = take(c, "fids", &v);
    if (rc != ST_OK || strcmp(v, "none") == 0)
        return rc;
    char *num = strncmp(v, "dense ", 6) == 0 ? v + 6 : NULL;
    if (!num || !parse_ll(&num, INT64_MIN, INT64_MAX, &fid_min) || *num)
        rc = bad(c, "expected 'none' or 'dense FID' in ", "fids");
    l->dense = rc == ST_OK;
    l->fid_min = fid_min;
    return rc;
}

static st_status take_coordless(cursor *c, st_facts_layer *l)
{
    char *v;
    long long n = 0;
    st_status rc = take(c, "coordless", &v);
    if (rc == ST_OK && (!parse_ll(&v, 0, (long long)l->count, &n)))
        rc = bad(c, "a bad count in ", "coordless");
    if (rc == ST_OK && n && !(l->coordless = st_malloc((size_t)n * sizeof *l->coordless)))
        rc = ST_ERR_NOMEM;
    for (long long k = 0; rc == ST_OK && k < n; k++) {
        uint64_t pos;
        if (!parse_u64(&v, &pos) || pos >= l->count || (k && pos <= l->coordless[k - 1]))
            rc = bad(c, "positions must rise and lie below the count in ", "coordless");
        else
            l->coordless[l->ncoordless++] = pos;
    }
    if (rc == ST_OK && *v)
        rc = bad(c, "more positions than counted in ", "coordless");
    l->capcoordless = l->ncoordless;
    return rc;
}

static st_status take_layer(cursor *c, st_facts_layer *l)
{
    char *v;
    long long count = 0;
    st_status rc = take(c, "layer", &v);
    if (rc == ST_OK && *v)
        rc = bad(c, "extra text after ", "layer");
    if (rc == ST_OK)
        rc = take_string(c, "spec", &l->spec);
    if (rc == ST_OK)
        rc = take_string(c, "file", &l->file);
    if (rc == ST_OK)
        rc = take_identity(c, l);
    if (rc == ST_OK)
        rc = take_string(c, "format", &l->format);
    if (rc == ST_OK)
        rc = take_string(c, "name", &l->name);
    if (rc == ST_OK)
        rc = take_string(c, "crs", &l->crs);
    if (rc == ST_OK)
        rc = take_number(c, "count", 0, LLONG_MAX, &count);
    l->count = (uint64_t)count;
    if (rc == ST_OK)
        rc = take_flags(c, l);
    if (rc == ST_OK)
        rc = take_extent(c, l);
    if (rc == ST_OK)
        rc = take_fids(c, l);
    if (rc == ST_OK)
        rc = take_coordless(c, l);
    if (rc == ST_OK && (rc = take(c, "end", &v)) == ST_OK && *v)
        rc = bad(c, "extra text after ", "end");
    return rc;
}

/* The last line: the digest of everything before it, then nothing. */
static st_status take_digest(cursor *c, st_facts *f)
{
    char *v;
    st_status rc = take(c, "sha256", &v);
    if (rc != ST_OK)
        return rc;
    if (c->pos != c->len)
        return bad(c, "text after the digest", "");
    memcpy(f->sha256, c->digest, sizeof f->sha256);
    if (strcmp(v, f->sha256) != 0)
        return bad(c, "the digest does not match the contents (the file was changed or "
                      "damaged)", "");
    return ST_OK;
}

static st_status take_all(cursor *c, st_facts *f)
{
    char *v;
    long long n = 0;
    st_status rc = take(c, "stocktake-facts", &v);
    if (rc == ST_OK && strcmp(v, "1") != 0)
        rc = bad(c, "an unknown version ", v);
    if (rc == ST_OK)
        rc = take_number(c, "layers", 1, 1 << 20, &n);
    if (rc == ST_OK && !(f->layers = st_calloc((size_t)n, sizeof *f->layers)))
        rc = ST_ERR_NOMEM;
    for (long long i = 0; rc == ST_OK && i < n; i++) {
        f->n++;
        rc = take_layer(c, &f->layers[i]);
    }
    return rc == ST_OK ? take_digest(c, f) : rc;
}

static st_status slurp(const char *path, cursor *c, st_diags *diags)
{
    st_loc loc = ST_LOC_FILE(path);
    FILE *in = st_fopen_regular(path);
    if (!in)
        return st_diags_add(diags, ST_SEV_ERROR, ST_ERR_IO, &loc, "cannot open: %s",
                            st_open_error(errno));
    st_buf b;
    st_buf_init(&b, 0);
    char chunk[65536];
    size_t n;
    st_status rc = ST_OK;
    while (rc == ST_OK && (n = fread(chunk, 1, sizeof chunk, in)) > 0)
        rc = b.len + n > ST_FACTS_MAX_BYTES ? ST_ERR_LIMIT : st_buf_append(&b, chunk, n);
    if (rc == ST_OK && ferror(in))
        rc = st_diags_add(diags, ST_SEV_ERROR, ST_ERR_IO, &loc, "cannot read: %s",
                          strerror(errno));
    else if (rc == ST_ERR_LIMIT)
        st_diags_add(diags, ST_SEV_ERROR, ST_ERR_LIMIT, &loc,
                     "a facts file larger than %zu bytes", ST_FACTS_MAX_BYTES);
    fclose(in);
    c->len = b.len;
    c->text = st_buf_take(&b);
    if (rc == ST_OK && !c->text)
        rc = ST_ERR_NOMEM;
    return rc;
}

st_status st_facts_read(const char *path, st_facts *out, st_diags *diags)
{
    memset(out, 0, sizeof *out);
    cursor c = {path, NULL, 0, 0, 0, diags, ""};
    st_status rc = slurp(path, &c, diags);
    if (rc == ST_OK) {   /* the digest covers every line but the last */
        size_t last = c.len && c.text[c.len - 1] == '\n' ? c.len - 1 : c.len;
        while (last && c.text[last - 1] != '\n')
            last--;
        st_sha256_hex(c.text, last, c.digest);
        rc = take_all(&c, out);
    }
    st_free(c.text);
    if (rc != ST_OK)
        st_facts_free(out);
    return rc;
}
