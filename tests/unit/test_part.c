/*
** tests/unit/test_part.c -- the part of a tile (stocktake/part.h):
**   - the feature codec: every member of st_feature survives encode ->
**     decode bit for bit (geometry of every shape, NaN payloads and -0.0,
**     NULL kept apart from "", every provenance, rules interned), and a
**     decoded record encodes to the very same bytes;
**   - hostile records: every truncation, every single-bit flip and random
**     mutations decode to ST_ERR_FORMAT or to a feature that re-encodes to
**     exactly the mutated bytes; huge counts allocate nothing big;
**   - the part file: write -> read of features (bid order whatever the
**     write order), findings (NaN x/y as NULL), layers with their fields,
**     files, info and unmapped counts; nothing left without a commit; the
**     reader changes nothing; non-parts, other versions, truncated files
**     and damaged records are ST_ERR_FORMAT with the file (and bid) named;
**   - allocation failures in the codec and the part, each ST_ERR_NOMEM
**     without leaks (this suite runs under ASan);
**   - GDAL's validate_gpkg.py and ogrinfo accept a part (skipped without
**     GDAL's Python bindings).
*/
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <cmocka.h>

#include <dirent.h>
#include <math.h>
#include <sqlite3.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <sys/wait.h>
#include <unistd.h>

#include "stocktake/io.h"
#include "stocktake/part.h"
#include "scratch.h"

#define PY "/usr/bin/python3"
#define VALIDATE "/usr/lib/python3/dist-packages/osgeo_utils/samples/validate_gpkg.py"

/* ---- building features ------------------------------------------------------ */

static double nan_payload(uint64_t payload)
{
    uint64_t bits = 0x7ff0000000000000ULL | (payload & 0x000fffffffffffffULL);
    double d;
    memcpy(&d, &bits, sizeof d);
    return d;
}

/* A ring of n points around (cx, cy), the first repeated at the end. */
static void add_ring(st_geom *g, double cx, double cy, double r, int n)
{
    assert_int_equal(st_geom_begin_ring(g), ST_OK);
    for (int i = 0; i <= n; i++) {
        int k = i % n;
        assert_int_equal(st_geom_add_xy(g, cx + r * (k == 1 || k == 2),
                                        cy + r * (k >= 2)), ST_OK);
    }
}

static void set_values(st_feature *f, const char *const *v, uint32_t n)
{
    for (uint32_t i = 0; i < n; i++)
        assert_int_equal(st_feature_set_value(f, i, v[i], v[i] ? strlen(v[i]) : 0), ST_OK);
}

static void set_schema(st_feature *f, uint32_t n)
{
    static const char *const rules[] = {"demo.rules:12", NULL, "demo.rules:40",
                                        "starter.rules:7", "demo.rules:12"};
    static const char *const texts[] = {"RES", NULL, "", "2", "MUR"};
    f->schema = st_calloc(n, sizeof *f->schema);
    assert_non_null(f->schema);
    f->nschema = n;
    for (uint32_t i = 0; i < n; i++) {
        f->schema[i].text = st_strdup(texts[i % 5]);
        f->schema[i].from = (st_provenance)(i % 5);   /* every provenance */
        f->schema[i].rule = rules[i % 5];
    }
}

/* Kinds of feature the codec must carry. */
enum { F_HOLES, F_MULTI, F_NULL, F_EMPTY, F_ZM_SOURCE, F_ODD_DOUBLES, F_BARE,
       F_PART_NO_RING, F_KINDS };

static st_feature *make_feature(int kind, uint64_t bid)
{
    static const char *const values[] = {"way/1000652", NULL, "", "casa adosada", "R+2"};
    st_feature *f = st_feature_new();
    assert_non_null(f);
    f->layer = (uint32_t)kind % 3;
    f->index = 1000 + bid;
    f->bid = bid;
    f->district = kind == F_BARE ? -1 : (int32_t)kind;
    switch (kind) {
    case F_HOLES:
        f->geom.type = ST_GEOM_POLYGON;
        assert_int_equal(st_geom_begin_part(&f->geom), ST_OK);
        add_ring(&f->geom, 2.35, 48.85, 0.001, 4);
        add_ring(&f->geom, 2.3502, 48.8502, 0.0002, 4);
        add_ring(&f->geom, 2.3506, 48.8506, 0.0002, 4);
        f->source_id = st_strdup("42");
        set_values(f, values, 5);
        set_schema(f, 5);
        f->area_m2 = 1234.5;
        f->perimeter_m = 140.25;
        f->flags = 0x5;
        break;
    case F_MULTI:
        f->geom.type = ST_GEOM_MULTIPOLYGON;
        for (int p = 0; p < 3; p++) {
            assert_int_equal(st_geom_begin_part(&f->geom), ST_OK);
            add_ring(&f->geom, -70.6 + p, -33.4, 0.01, 4);
            if (p == 1)
                add_ring(&f->geom, -70.6 + p + 0.002, -33.398, 0.001, 4);
        }
        f->source_id = st_strdup("");
        set_values(f, values, 3);
        f->status = ST_STATUS_DUPLICATE;
        f->duplicate_of = 7;
        f->reason = st_strdup("same footprint as bid 7");
        break;
    case F_NULL:
        f->status = ST_STATUS_REJECTED;
        f->reason = st_strdup("");
        set_schema(f, 3);
        break;
    case F_EMPTY:
        f->geom.type = ST_GEOM_POLYGON;
        f->status = ST_STATUS_REJECTED;
        f->reason = st_strdup("empty geometry");
        break;
    case F_ZM_SOURCE:
        f->geom.type = ST_GEOM_POLYGON;
        f->geom.has_z = 1;
        add_ring(&f->geom, 10, 50, 0.5, 5);
        f->source_geom = st_geom_new();
        assert_non_null(f->source_geom);
        f->source_geom->type = ST_GEOM_COLLECTION;
        f->source_geom->has_z = 1;
        f->source_geom->has_m = 1;
        add_ring(f->source_geom, 10, 50, 0.5, 6);
        f->status = ST_STATUS_REPAIRED;
        f->flags = 0xffffffffu;
        f->area_m2 = INFINITY;
        break;
    case F_ODD_DOUBLES:
        f->geom.type = ST_GEOM_MULTIPOINT;
        assert_int_equal(st_geom_begin_ring(&f->geom), ST_OK);
        assert_int_equal(st_geom_add_xy(&f->geom, -0.0, nan_payload(0x8badf00d)), ST_OK);
        assert_int_equal(st_geom_begin_part(&f->geom), ST_OK);
        assert_int_equal(st_geom_begin_ring(&f->geom), ST_OK);
        assert_int_equal(st_geom_add_xy(&f->geom, -nan_payload(1), 0.0), ST_OK);
        f->area_m2 = -0.0;
        f->perimeter_m = nan_payload(0x7ffff);
        f->layer = UINT32_MAX;
        f->index = UINT64_MAX;
        f->bid = bid;
        f->duplicate_of = UINT64_MAX;
        f->district = INT32_MAX;
        break;
    case F_BARE:
        break;
    case F_PART_NO_RING:   /* a part begun with no ring in it */
        f->geom.type = ST_GEOM_MULTILINESTRING;
        assert_int_equal(st_geom_begin_part(&f->geom), ST_OK);
        assert_int_equal(st_geom_begin_part(&f->geom), ST_OK);
        break;
    }
    return f;
}

/* ---- comparing features ------------------------------------------------------ */

static void expect_same_str(const char *a, const char *b)
{
    if (!a || !b)
        assert_true(a == b);   /* NULL only where NULL */
    else
        assert_string_equal(a, b);
}

static void expect_same_double(double a, double b)
{
    assert_memory_equal(&a, &b, sizeof a);
}

static void expect_same_geom(const st_geom *a, const st_geom *b)
{
    assert_int_equal(a->type, b->type);
    assert_int_equal(a->has_z, b->has_z);
    assert_int_equal(a->has_m, b->has_m);
    assert_int_equal(a->nparts, b->nparts);
    assert_int_equal(a->nrings, b->nrings);
    assert_int_equal(a->ncoords, b->ncoords);
    if (a->nparts)
        assert_memory_equal(a->part_ring, b->part_ring, (a->nparts + 1) * sizeof(uint32_t));
    if (a->nrings)
        assert_memory_equal(a->ring_coord, b->ring_coord, (a->nrings + 1) * sizeof(uint32_t));
    if (a->ncoords)
        assert_memory_equal(a->xy, b->xy, a->ncoords * 2 * sizeof(double));
}

static void expect_same_feature(const st_feature *a, const st_feature *b)
{
    assert_int_equal(a->layer, b->layer);
    assert_true(a->index == b->index);
    expect_same_str(a->source_id, b->source_id);
    expect_same_geom(&a->geom, &b->geom);
    assert_int_equal(!a->source_geom, !b->source_geom);
    if (a->source_geom)
        expect_same_geom(a->source_geom, b->source_geom);
    assert_int_equal(a->nvalues, b->nvalues);
    for (uint32_t i = 0; i <= a->nvalues; i++)
        expect_same_str(st_feature_value(a, i), st_feature_value(b, i));
    assert_true(a->bid == b->bid);
    assert_int_equal(a->status, b->status);
    expect_same_str(a->reason, b->reason);
    assert_true(a->duplicate_of == b->duplicate_of);
    expect_same_double(a->area_m2, b->area_m2);
    expect_same_double(a->perimeter_m, b->perimeter_m);
    assert_int_equal(a->flags, b->flags);
    assert_int_equal(a->district, b->district);
    assert_int_equal(a->nschema, b->nschema);
    for (uint32_t i = 0; i < a->nschema; i++) {
        expect_same_str(a->schema[i].text, b->schema[i].text);
        assert_int_equal(a->schema[i].from, b->schema[i].from);
        expect_same_str(a->schema[i].rule, b->schema[i].rule);
    }
}

/* Encode f into a fresh buffer (owned by the caller: st_buf_free). */
static st_buf encoded(const st_feature *f)
{
    st_buf b;
    st_buf_init(&b, 0);
    assert_int_equal(st_feature_encode(f, &b), ST_OK);
    return b;
}

/* ---- codec ------------------------------------------------------------------- */

static void test_codec_round_trip_every_kind(void **state)
{
    (void)state;
    st_strtab *strings = st_strtab_new(0, 0);
    assert_non_null(strings);
    for (int kind = 0; kind < F_KINDS; kind++) {
        st_feature *f = make_feature(kind, 100 + (uint64_t)kind);
        st_buf b = encoded(f);
        st_feature *g = NULL;
        assert_int_equal(st_feature_decode(b.data, b.len, strings, &g), ST_OK);
        expect_same_feature(f, g);
        /* arrays trimmed to their contents */
        assert_int_equal(g->geom.cap_coords, g->geom.ncoords);
        assert_int_equal(g->geom.cap_parts, g->geom.nparts ? g->geom.nparts + 1 : 0);
        assert_int_equal(g->geom.cap_rings, g->geom.nparts ? g->geom.nrings + 1 : 0);
        /* the same bytes again */
        st_buf again = encoded(g);
        assert_int_equal(again.len, b.len);
        assert_memory_equal(again.data, b.data, b.len);
        st_buf_free(&again);
        st_buf_free(&b);
        st_feature_free(f);
        st_feature_free(g);
    }
    st_strtab_free(strings);
}

static void test_codec_appends_to_the_buffer(void **state)
{
    (void)state;
    st_feature *f = make_feature(F_HOLES, 1);
    st_buf one = encoded(f);
    st_buf b;
    st_buf_init(&b, 0);
    assert_int_equal(st_buf_puts(&b, "head"), ST_OK);
    assert_int_equal(st_feature_encode(f, &b), ST_OK);
    assert_int_equal(st_feature_encode(f, &b), ST_OK);
    assert_int_equal(b.len, 4 + 2 * one.len);
    assert_memory_equal(b.data, "head", 4);
    assert_memory_equal(b.data + 4, one.data, one.len);
    assert_memory_equal(b.data + 4 + one.len, one.data, one.len);
    /* a buffer limit is respected, and the buffer is left as it was */
    st_buf small;
    st_buf_init(&small, one.len - 1);
    assert_int_equal(st_feature_encode(f, &small), ST_ERR_LIMIT);
    assert_int_equal(small.len, 0);
    st_buf_free(&small);
    st_buf_free(&b);
    st_buf_free(&one);
    st_feature_free(f);
}

static void test_codec_values_and_rules(void **state)
{
    (void)state;
    st_strtab *strings = st_strtab_new(0, 0);
    st_feature *f = make_feature(F_HOLES, 3);
    st_buf b = encoded(f);
    st_feature *g = NULL, *h = NULL;
    assert_int_equal(st_feature_decode(b.data, b.len, strings, &g), ST_OK);
    assert_int_equal(st_feature_decode(b.data, b.len, strings, &h), ST_OK);
    /* values in one packed block: NULL and "" apart */
    assert_true(g->values_packed > 0);
    assert_null(st_feature_value(g, 1));
    assert_string_equal(st_feature_value(g, 2), "");
    assert_int_equal(st_feature_filled(g), 3);
    /* rules interned: one pointer per distinct rule, owned by the table */
    assert_ptr_equal(g->schema[0].rule, h->schema[0].rule);
    assert_ptr_equal(g->schema[0].rule, g->schema[4].rule);
    assert_null(g->schema[1].rule);
    assert_int_equal(st_strtab_count(strings), 3);
    assert_null(g->schema[1].text);
    assert_string_equal(g->schema[2].text, "");
    /* setting a value later unpacks, as for any packed feature */
    assert_int_equal(st_feature_set_value(g, 1, "x", 1), ST_OK);
    assert_int_equal(g->values_packed, 0);
    assert_string_equal(st_feature_value(g, 4), "R+2");
    /* the geometry builder goes on from a decoded geometry */
    assert_int_equal(st_geom_begin_part(&g->geom), ST_OK);
    add_ring(&g->geom, 0, 0, 1, 4);
    assert_int_equal(g->geom.nparts, 2);
    /* without a string table a record naming a rule is refused */
    st_feature *k = (st_feature *)1;
    assert_int_equal(st_feature_decode(b.data, b.len, NULL, &k), ST_ERR_USAGE);
    assert_null(k);
    /* the table's limit holds */
    st_strtab *tiny = st_strtab_new(1, 0);
    assert_int_equal(st_feature_decode(b.data, b.len, tiny, &k), ST_ERR_LIMIT);
    assert_null(k);
    st_strtab_free(tiny);
    st_feature_free(g);
    st_feature_free(h);
    st_feature_free(f);
    st_buf_free(&b);
    st_strtab_free(strings);
}

static void test_codec_encode_refuses_inconsistent(void **state)
{
    (void)state;
    st_buf b;
    st_buf_init(&b, 0);
    st_feature *f = make_feature(F_HOLES, 1);
    f->geom.part_ring[1] = 2;          /* ends before the last ring */
    assert_int_equal(st_feature_encode(f, &b), ST_ERR_USAGE);
    f->geom.part_ring[1] = 3;
    f->geom.ring_coord[1] = 20;        /* decreasing */
    assert_int_equal(st_feature_encode(f, &b), ST_ERR_USAGE);
    f->geom.ring_coord[1] = 5;
    f->status = (st_feature_status)9;
    assert_int_equal(st_feature_encode(f, &b), ST_ERR_USAGE);
    f->status = ST_STATUS_OK;
    f->district = -2;
    assert_int_equal(st_feature_encode(f, &b), ST_ERR_USAGE);
    f->district = 0;
    f->schema[2].from = (st_provenance)5;
    assert_int_equal(st_feature_encode(f, &b), ST_ERR_USAGE);
    f->schema[2].from = ST_PROV_SOURCE;
    assert_int_equal(b.len, 0);
    assert_int_equal(st_feature_encode(f, &b), ST_OK);
    st_buf_free(&b);
    st_feature_free(f);
}

/* Decode d[0..n): ST_ERR_FORMAT, or a feature that encodes to d again. */
static void expect_format_or_canonical(const unsigned char *d, size_t n, st_strtab *strings)
{
    st_feature *g = (st_feature *)1;
    st_status rc = st_feature_decode(d, n, strings, &g);
    if (rc != ST_OK) {
        assert_int_equal(rc, ST_ERR_FORMAT);
        assert_null(g);
        return;
    }
    st_buf again = encoded(g);
    assert_int_equal(again.len, n);
    assert_memory_equal(again.data, d, n);
    st_buf_free(&again);
    st_feature_free(g);
}

static void test_codec_every_truncation(void **state)
{
    (void)state;
    st_strtab *strings = st_strtab_new(0, 0);
    for (int kind = 0; kind < F_KINDS; kind++) {
        st_feature *f = make_feature(kind, 5);
        st_buf b = encoded(f);
        for (size_t n = 0; n < b.len; n++) {
            st_feature *g = (st_feature *)1;
            assert_int_equal(st_feature_decode(b.data, n, strings, &g), ST_ERR_FORMAT);
            assert_null(g);
        }
        /* one byte too many */
        assert_int_equal(st_buf_append(&b, "", 1), ST_OK);
        st_feature *g = NULL;
        assert_int_equal(st_feature_decode(b.data, b.len, strings, &g), ST_ERR_FORMAT);
        st_buf_free(&b);
        st_feature_free(f);
    }
    st_feature *g = NULL;
    assert_int_equal(st_feature_decode(NULL, 0, strings, &g), ST_ERR_FORMAT);
    st_strtab_free(strings);
}

static void test_codec_bit_flips_and_mutations(void **state)
{
    (void)state;
    st_strtab *strings = st_strtab_new(0, 0);
    uint64_t seed = 0x9e3779b97f4a7c15ULL;
    long decoded = 0, refused = 0;
    for (int kind = 0; kind < F_KINDS; kind++) {
        st_feature *f = make_feature(kind, 77);
        st_buf b = encoded(f);
        unsigned char *d = (unsigned char *)b.data;
        /* every single bit */
        for (size_t i = 0; i < b.len; i++)
            for (int bit = 0; bit < 8; bit++) {
                d[i] ^= (unsigned char)(1u << bit);
                expect_format_or_canonical(d, b.len, strings);
                d[i] ^= (unsigned char)(1u << bit);
            }
        /* random bytes at random places, a few at a time */
        unsigned char *m = malloc(b.len);
        assert_non_null(m);
        for (int round = 0; round < 2000; round++) {
            memcpy(m, d, b.len);
            int k = 1 + round % 4;
            for (int j = 0; j < k; j++) {
                seed ^= seed << 13;
                seed ^= seed >> 7;
                seed ^= seed << 17;
                m[(seed >> 8) % b.len] = (unsigned char)(round & 1 ? seed : seed % 3 + 0xfd);
            }
            st_feature *g = NULL;
            st_status rc = st_feature_decode(m, b.len, strings, &g);
            st_feature_free(g);
            rc == ST_OK ? decoded++ : refused++;
            expect_format_or_canonical(m, b.len, strings);
        }
        free(m);
        st_buf_free(&b);
        st_feature_free(f);
    }
    /* both outcomes happen: coordinates change freely, counts do not */
    assert_true(decoded > 0);
    assert_true(refused > 0);
    st_strtab_free(strings);
}

/* A record by hand, little-endian. */
typedef struct rec {
    unsigned char d[512];
    size_t n;
} rec;

static void r8(rec *r, unsigned v)
{
    r->d[r->n++] = (unsigned char)v;
}

static void r32(rec *r, uint32_t v)
{
    for (int i = 0; i < 4; i++)
        r8(r, (v >> (8 * i)) & 0xff);
}

static void r64(rec *r, uint64_t v)
{
    for (int i = 0; i < 8; i++)
        r8(r, (unsigned)(v >> (8 * i)) & 0xff);
}

/* Format byte, layer, index, NULL source id. */
static void r_head(rec *r)
{
    r->n = 0;
    r8(r, 1);
    r32(r, 0);
    r64(r, 0);
    r32(r, UINT32_MAX);
}

static void r_null_geom(rec *r)
{
    r8(r, 0); r8(r, 0); r8(r, 0);
    r32(r, 0); r32(r, 0); r32(r, 0);
}

/* Everything after the geometries with no values and no schema. */
static void r_tail(rec *r, unsigned status, int32_t district, uint32_t nschema)
{
    r64(r, 1);                 /* bid */
    r8(r, status);
    r32(r, UINT32_MAX);        /* reason NULL */
    r64(r, 0);
    r64(r, 0);
    r64(r, 0);
    r32(r, 0);                 /* flags */
    r32(r, (uint32_t)district);
    r32(r, nschema);
}

/* Decode r; *allocs (when not NULL) gets the allocations decode made. */
static st_status decode_rec_counted(const rec *r, long *allocs)
{
    st_strtab *strings = st_strtab_new(0, 0);
    st_feature *g = NULL;
    st_alloc_fail_after(1000000);
    st_status rc = st_feature_decode(r->d, r->n, strings, &g);
    long used = st_alloc_count();
    st_alloc_fail_after(0);
    if (allocs)
        *allocs = used;
    st_feature_free(g);
    st_strtab_free(strings);
    return rc;
}

static st_status decode_rec(const rec *r)
{
    return decode_rec_counted(r, NULL);
}

static void test_codec_hostile_records(void **state)
{
    (void)state;
    rec r;
    /* the well-formed minimum decodes */
    r_head(&r); r_null_geom(&r); r_null_geom(&r); r32(&r, 0); r_tail(&r, 0, -1, 0);
    assert_int_equal(decode_rec(&r), ST_OK);
    /* wrong format byte */
    r.d[0] = 2;
    assert_int_equal(decode_rec(&r), ST_ERR_FORMAT);
    /* huge counts with few bytes: refused before any allocation */
    static const uint32_t counts[][3] = {
        {0xfffffffe, 0xfffffffe, 0xfffffffe}, {0xffffffff, 1, 1}, {1, 0xffffffff, 0},
        {1, 1, 0x10000000}, {0, 1, 0}, {0, 0, 1}, {1, 0, 1}};
    for (size_t i = 0; i < sizeof counts / sizeof counts[0]; i++) {
        r_head(&r);
        r8(&r, ST_GEOM_POLYGON); r8(&r, 0); r8(&r, 0);
        r32(&r, counts[i][0]); r32(&r, counts[i][1]); r32(&r, counts[i][2]);
        r32(&r, 0); r32(&r, 1);
        long used = 0;
        assert_int_equal(decode_rec_counted(&r, &used), ST_ERR_FORMAT);
        assert_true(used <= 1);   /* the feature itself, no arrays */
    }
    /* offsets: part_ring not from 0, not ending at nrings, decreasing */
    static const uint32_t parts[][3] = {{1, 1, 1}, {0, 1, 2}, {0, 2, 1}};
    for (size_t i = 0; i < 3; i++) {
        r_head(&r);
        r8(&r, ST_GEOM_MULTIPOLYGON); r8(&r, 0); r8(&r, 0);
        r32(&r, 2); r32(&r, 1); r32(&r, 1);
        for (int k = 0; k < 3; k++)
            r32(&r, parts[i][k]);
        r32(&r, 0); r32(&r, 1);            /* ring_coord */
        r64(&r, 0); r64(&r, 0);            /* one coordinate */
        r_null_geom(&r); r32(&r, 0); r_tail(&r, 0, -1, 0);
        assert_int_equal(decode_rec(&r), ST_ERR_FORMAT);
    }
    /* the same with good offsets decodes */
    r_head(&r);
    r8(&r, ST_GEOM_MULTIPOLYGON); r8(&r, 0); r8(&r, 0);
    r32(&r, 2); r32(&r, 1); r32(&r, 1);
    r32(&r, 0); r32(&r, 0); r32(&r, 1);
    r32(&r, 0); r32(&r, 1);
    r64(&r, 0); r64(&r, 0);
    r_null_geom(&r); r32(&r, 0); r_tail(&r, 0, -1, 0);
    assert_int_equal(decode_rec(&r), ST_OK);
    /* enums out of range: geometry type, status, provenance; district -2 */
    r_head(&r); r8(&r, ST_GEOM_OTHER + 1); r8(&r, 0); r8(&r, 0);
    r32(&r, 0); r32(&r, 0); r32(&r, 0); r_null_geom(&r); r32(&r, 0); r_tail(&r, 0, -1, 0);
    assert_int_equal(decode_rec(&r), ST_ERR_FORMAT);
    r_head(&r); r_null_geom(&r); r_null_geom(&r); r32(&r, 0); r_tail(&r, 4, -1, 0);
    assert_int_equal(decode_rec(&r), ST_ERR_FORMAT);
    r_head(&r); r_null_geom(&r); r_null_geom(&r); r32(&r, 0); r_tail(&r, 0, -2, 0);
    assert_int_equal(decode_rec(&r), ST_ERR_FORMAT);
    r_head(&r); r_null_geom(&r); r_null_geom(&r); r32(&r, 0); r_tail(&r, 0, -1, 1);
    r32(&r, UINT32_MAX); r8(&r, ST_PROV_SOURCE + 1); r32(&r, UINT32_MAX);
    assert_int_equal(decode_rec(&r), ST_ERR_FORMAT);
    r.d[r.n - 5] = ST_PROV_SOURCE;
    assert_int_equal(decode_rec(&r), ST_OK);
    /* many values announced, none there; a NUL inside a string */
    r_head(&r); r_null_geom(&r); r_null_geom(&r); r32(&r, 0x40000000); r_tail(&r, 0, -1, 0);
    assert_int_equal(decode_rec(&r), ST_ERR_FORMAT);
    r_head(&r); r_null_geom(&r); r_null_geom(&r);
    r32(&r, 1); r32(&r, 3); r8(&r, 'a'); r8(&r, 0); r8(&r, 'b');
    r_tail(&r, 0, -1, 0);
    assert_int_equal(decode_rec(&r), ST_ERR_FORMAT);
    r.d[r.n - 49 - 2] = 'c';   /* the NUL replaced: valid */
    assert_int_equal(decode_rec(&r), ST_OK);
    /* a string length beyond the end */
    r_head(&r);
    r.n -= 4;
    r32(&r, 0xfffffffe);
    assert_int_equal(decode_rec(&r), ST_ERR_FORMAT);
}

static void test_codec_nomem(void **state)
{
    (void)state;
    for (int kind = 0; kind < F_KINDS; kind++) {
        st_feature *f = make_feature(kind, 9);
        st_buf ref = encoded(f);
        long n;
        for (n = 1; n < 1000; n++) {
            st_strtab *strings = st_strtab_new(0, 0);
            assert_non_null(strings);
            st_buf b;
            st_buf_init(&b, 0);
            st_feature *g = NULL;
            st_alloc_fail_after(n);
            st_status rc = st_feature_encode(f, &b);
            if (rc == ST_OK)
                rc = st_feature_decode(b.data, b.len, strings, &g);
            long used = st_alloc_count();
            st_alloc_fail_after(0);
            if (rc == ST_OK) {
                assert_true(used < n);
                expect_same_feature(f, g);
            } else {
                assert_int_equal(rc, ST_ERR_NOMEM);
                assert_null(g);
            }
            st_feature_free(g);
            st_buf_free(&b);
            st_strtab_free(strings);
            if (rc == ST_OK)
                break;
        }
        assert_true(n > 1);
        st_buf_free(&ref);
        st_feature_free(f);
    }
}

/* ---- the part file ------------------------------------------------------------ */

typedef struct fixture {
    char dir[64];
} fixture;

static int group_setup(void **state)
{
    fixture *fx = calloc(1, sizeof *fx);
    if (!fx)
        return -1;
    snprintf(fx->dir, sizeof fx->dir, "/tmp/st-part-XXXXXX");
    if (!mkdtemp(fx->dir))
        return -1;
    *state = fx;
    return 0;
}

static int group_teardown(void **state)
{
    fixture *fx = *state;
    int rc = scratch_remove(fx->dir);
    free(fx);
    return rc;
}

static int count_entries(const char *dir)
{
    DIR *d = opendir(dir);
    assert_non_null(d);
    int n = 0;
    struct dirent *e;
    while ((e = readdir(d)))
        if (strcmp(e->d_name, ".") && strcmp(e->d_name, ".."))
            n++;
    closedir(d);
    return n;
}

/* A fresh empty folder under the fixture's. */
static void subdir(const fixture *fx, const char *name, char *out, size_t n)
{
    snprintf(out, n, "%s/%s", fx->dir, name);
    assert_int_equal(mkdir(out, 0700), 0);
}

/* What the sample part holds: features of these kinds with these bids,
** written in this order. */
static const uint64_t sample_bids[] = {9, 2, 5, 1, 7};
static const int sample_kinds[] = {F_HOLES, F_MULTI, F_NULL, F_ODD_DOUBLES, F_ZM_SOURCE};
#define NSAMPLE (sizeof sample_bids / sizeof sample_bids[0])

static void sample_layers(st_part_layer layers[2])
{
    memset(layers, 0, 2 * sizeof *layers);
    layers[0] = (st_part_layer){"buildings", "in/buildings.gpkg", "GPKG", "EPSG:4326",
                                123456789012ULL, {NULL, 0, 0}};
    st_fields_init(&layers[0].fields);
    st_fields *f = &layers[0].fields;
    assert_int_equal(st_fields_add(f, "building", ST_FIELD_TEXT, 80, 0, NULL), ST_OK);
    assert_int_equal(st_fields_add(f, "levels", ST_FIELD_INTEGER, 4, 0, NULL), ST_OK);
    assert_int_equal(st_fields_add(f, "height", ST_FIELD_REAL, 10, 2, NULL), ST_OK);
    assert_int_equal(st_fields_add(f, "tags", ST_FIELD_JSON, 0, 0, NULL), ST_OK);
    layers[1] = (st_part_layer){"extra", NULL, "GeoJSON", NULL, 0, {NULL, 0, 0}};
    st_fields_init(&layers[1].fields);
}

static void sample_findings(st_findings *f)
{
    st_findings_init(f);
    assert_int_equal(st_findings_add(f, 9, "geom.self-intersection", ST_SEV_WARNING,
                                     2.35, 48.85, "ring self-intersects"), ST_OK);
    assert_int_equal(st_findings_add(f, 2, "attr.unmapped", ST_SEV_NOTE, NAN, NAN,
                                     "value '%s' not mapped", "casa"), ST_OK);
    assert_int_equal(st_findings_add(f, 5, "geom.tiny", ST_SEV_ERROR, -0.5, NAN, "%s", ""), ST_OK);
}

static const char *const sample_kv[] = {"tile", "14/8192/5461", "rules", "sha256:ab12",
                                        "empty", "", "none", NULL};
static const char *const un_field[] = {"building", "roof", "building"};
static const char *const un_value[] = {"casa", "", "hut"};
static const uint64_t un_count[] = {3, 1, UINT64_MAX};

/* The sample's inputs, made before any allocation is made to fail. */
typedef struct sample {
    st_part_layer layers[2];
    st_findings fnd;
    st_part_file files[2];
    st_feature *f[NSAMPLE];
} sample;

static void sample_make(sample *s)
{
    sample_layers(s->layers);
    sample_findings(&s->fnd);
    s->files[0] = (st_part_file){"input", "in/buildings.gpkg", "", 42};
    s->files[1] = (st_part_file){"rules", "demo.rules", "", UINT64_MAX};
    memset(s->files[0].sha256, 'a', 64);
    memcpy(s->files[1].sha256, "0123", 5);
    for (size_t i = 0; i < NSAMPLE; i++)
        s->f[i] = make_feature(sample_kinds[i], sample_bids[i]);
}

static void sample_free(sample *s)
{
    st_findings_free(&s->fnd);
    st_fields_free(&s->layers[0].fields);
    for (size_t i = 0; i < NSAMPLE; i++)
        st_feature_free(s->f[i]);
}

/* Write the sample part at 'path'; returns the status of the first failure. */
static st_status write_sample_from(const char *path, st_diags *d, int commit, const sample *s)
{
    const st_part_layer *layers = s->layers;
    const st_findings fnd = s->fnd;
    const st_part_file *files = s->files;
    st_part_writer *w = NULL;
    st_status rc = st_part_writer_open(path, d, &w);
    if (rc == ST_OK)
        rc = st_part_write_info(w, sample_kv, 4);
    if (rc == ST_OK)
        rc = st_part_write_layers(w, layers, 2);
    if (rc == ST_OK)
        rc = st_part_write_files(w, files, 2);
    for (size_t i = 0; rc == ST_OK && i < NSAMPLE; i++)
        rc = st_part_write_feature(w, s->f[i], sample_bids[i] == 2);
    if (rc == ST_OK)
        rc = st_part_write_findings(w, &fnd);
    if (rc == ST_OK)
        rc = st_part_write_unmapped(w, un_field, un_value, un_count, 3, 17);
    if (rc == ST_OK && commit)
        rc = st_part_writer_commit(w);
    st_part_writer_close(w);
    return rc;
}

static st_status write_sample(const char *path, st_diags *d, int commit)
{
    sample s;
    sample_make(&s);
    st_status rc = write_sample_from(path, d, commit, &s);
    sample_free(&s);
    return rc;
}

typedef struct unmapped_seen {
    int n;
    char text[256];
} unmapped_seen;

static st_status on_unmapped(void *ud, const char *field, const char *value, uint64_t count)
{
    unmapped_seen *u = ud;
    size_t at = strlen(u->text);
    snprintf(u->text + at, sizeof u->text - at, "%s=%s:%llu;", field, value,
             (unsigned long long)count);
    u->n++;
    return ST_OK;
}

/* Read the whole part; returns the status of the first failure. */
static st_status read_all(const char *path, st_diags *d, int check)
{
    st_strtab *strings = st_strtab_new(0, 0);
    if (!strings)
        return ST_ERR_NOMEM;
    st_findings fnd;
    st_findings_init(&fnd);
    st_part *p = NULL;
    st_status rc = st_part_open(path, d, &p);
    st_feature *f = NULL;
    int shared = -1;
    size_t k = 0;
    uint64_t last = 0;
    while (rc == ST_OK && (rc = st_part_next_feature(p, strings, &f, &shared)) == ST_OK && f) {
        if (check) {
            assert_true(f->bid > last);   /* bid order */
            last = f->bid;
            size_t i = 0;
            while (sample_bids[i] != f->bid)
                i++;
            st_feature *want = make_feature(sample_kinds[i], f->bid);
            expect_same_feature(want, f);
            st_feature_free(want);
            assert_int_equal(shared, f->bid == 2);
        }
        k++;
        st_feature_free(f);
    }
    if (rc == ST_OK)
        rc = st_part_read_findings(p, strings, &fnd);
    unmapped_seen u = {0, ""};
    uint64_t dropped = 0;
    if (rc == ST_OK)
        rc = st_part_read_unmapped(p, on_unmapped, &u, &dropped);
    if (rc == ST_OK && check) {
        assert_int_equal(k, NSAMPLE);
        st_findings want;
        sample_findings(&want);
        assert_int_equal(fnd.count, want.count);
        for (size_t i = 0; i < want.count; i++) {
            assert_true(fnd.items[i].bid == want.items[i].bid);
            assert_string_equal(fnd.items[i].code, want.items[i].code);
            assert_int_equal(fnd.items[i].severity, want.items[i].severity);
            assert_string_equal(fnd.items[i].message, want.items[i].message);
            assert_int_equal(isnan(fnd.items[i].x), isnan(want.items[i].x));
            assert_int_equal(isnan(fnd.items[i].y), isnan(want.items[i].y));
            if (!isnan(want.items[i].x))
                expect_same_double(fnd.items[i].x, want.items[i].x);
            if (!isnan(want.items[i].y))
                expect_same_double(fnd.items[i].y, want.items[i].y);
        }
        st_findings_free(&want);
        uint32_t id;
        assert_true(st_strtab_find(strings, "geom.tiny", 9, &id));
        assert_ptr_equal(fnd.items[2].code, st_strtab_get(strings, id, NULL));
        assert_int_equal(u.n, 3);
        assert_string_equal(u.text, "building=casa:3;roof=:1;building=hut:18446744073709551615;");
        assert_true(dropped == 17);
        /* info */
        assert_string_equal(st_part_info(p, "tile"), "14/8192/5461");
        assert_string_equal(st_part_info(p, "rules"), "sha256:ab12");
        assert_string_equal(st_part_info(p, "empty"), "");
        assert_null(st_part_info(p, "none"));
        assert_null(st_part_info(p, "missing"));
        assert_string_equal(st_part_info(p, "part_format"), "1");
        assert_string_equal(st_part_path(p), path);
        /* layers and fields */
        size_t nl = 0, nf = 0;
        const st_part_layer *l = st_part_layers(p, &nl);
        assert_int_equal(nl, 2);
        st_part_layer want_l[2];
        sample_layers(want_l);
        for (size_t i = 0; i < 2; i++) {
            expect_same_str(l[i].name, want_l[i].name);
            expect_same_str(l[i].path, want_l[i].path);
            expect_same_str(l[i].format, want_l[i].format);
            expect_same_str(l[i].crs, want_l[i].crs);
            assert_true(l[i].read == want_l[i].read);
            assert_int_equal(l[i].fields.count, want_l[i].fields.count);
            for (uint32_t j = 0; j < want_l[i].fields.count; j++) {
                const st_field *a = &l[i].fields.items[j], *b = &want_l[i].fields.items[j];
                assert_string_equal(a->name, b->name);
                assert_int_equal(a->type, b->type);
                assert_int_equal(a->width, b->width);
                assert_int_equal(a->decimals, b->decimals);
            }
        }
        st_fields_free(&want_l[0].fields);
        /* files */
        const st_part_file *fl = st_part_files(p, &nf);
        assert_int_equal(nf, 2);
        assert_string_equal(fl[0].role, "input");
        assert_string_equal(fl[1].path, "demo.rules");
        assert_int_equal(strlen(fl[0].sha256), 64);
        assert_string_equal(fl[1].sha256, "0123");
        assert_true(fl[0].bytes == 42 && fl[1].bytes == UINT64_MAX);
        /* after the end: still the end */
        assert_int_equal(st_part_next_feature(p, strings, &f, &shared), ST_OK);
        assert_null(f);
    }
    st_part_close(p);
    st_findings_free(&fnd);
    st_strtab_free(strings);
    return rc;
}

/* Run cmd, capture its output (owned) and exit status. */
static char *run(const char *cmd, int *status)
{
    FILE *p = popen(cmd, "r");
    assert_non_null(p);
    st_buf b;
    st_buf_init(&b, 0);
    char chunk[4096];
    size_t n;
    while ((n = fread(chunk, 1, sizeof chunk, p)) > 0)
        assert_int_equal(st_buf_append(&b, chunk, n), ST_OK);
    int rc = pclose(p);
    *status = WIFEXITED(rc) ? WEXITSTATUS(rc) : -1;
    return st_buf_take(&b);
}

static void test_part_round_trip(void **state)
{
    fixture *fx = *state;
    char dir[128], path[256];
    subdir(fx, "roundtrip", dir, sizeof dir);
    snprintf(path, sizeof path, "%s/tile-14-8192-5461.part.gpkg", dir);
    st_diags d;
    st_diags_init(&d);
    assert_int_equal(write_sample(path, &d, 1), ST_OK);
    assert_int_equal(count_entries(dir), 1);   /* no temporary file left */
    /* reading changes nothing and leaves nothing beside the file */
    struct stat before, after;
    assert_int_equal(stat(path, &before), 0);
    char cmd[400];
    snprintf(cmd, sizeof cmd, "sha256sum '%s'", path);
    int status;
    char *sum = run(cmd, &status);
    chmod(path, 0444);   /* a read-only part reads as well */
    assert_int_equal(read_all(path, &d, 1), ST_OK);
    assert_int_equal(d.count, 0);
    chmod(path, 0644);
    assert_int_equal(stat(path, &after), 0);
    char *sum2 = run(cmd, &status);
    assert_string_equal(sum, sum2);
    assert_true(before.st_mtime == after.st_mtime && before.st_size == after.st_size);
    assert_int_equal(count_entries(dir), 1);
    st_free(sum);
    st_free(sum2);
    st_diags_free(&d);
}

static void test_part_without_commit_leaves_nothing(void **state)
{
    fixture *fx = *state;
    char dir[128], path[256];
    subdir(fx, "nocommit", dir, sizeof dir);
    snprintf(path, sizeof path, "%s/p.gpkg", dir);
    st_diags d;
    st_diags_init(&d);
    assert_int_equal(write_sample(path, &d, 0), ST_OK);
    assert_int_equal(count_entries(dir), 0);
    /* an older part at the path stays as it was */
    assert_int_equal(write_sample(path, &d, 1), ST_OK);
    struct stat before, after;
    assert_int_equal(stat(path, &before), 0);
    assert_int_equal(write_sample(path, &d, 0), ST_OK);
    assert_int_equal(stat(path, &after), 0);
    assert_true(before.st_ino == after.st_ino);
    assert_int_equal(count_entries(dir), 1);
    st_part_writer_close(NULL);
    st_part_close(NULL);
    st_diags_free(&d);
}

static void test_part_writer_refusals(void **state)
{
    fixture *fx = *state;
    char dir[128], path[256];
    subdir(fx, "refusals", dir, sizeof dir);
    snprintf(path, sizeof path, "%s/p.gpkg", dir);
    st_diags d;
    st_diags_init(&d);
    st_part_writer *w = NULL;
    assert_int_equal(st_part_writer_open(path, &d, &w), ST_OK);
    st_feature *f = make_feature(F_HOLES, 4);
    assert_int_equal(st_part_write_feature(w, f, 0), ST_OK);
    assert_int_equal(st_part_write_feature(w, f, 0), ST_ERR_USAGE);   /* same bid */
    f->bid = (uint64_t)INT64_MAX + 1;
    assert_int_equal(st_part_write_feature(w, f, 0), ST_ERR_LIMIT);
    f->bid = 5;
    f->geom.ring_coord[1] = 99;
    assert_int_equal(st_part_write_feature(w, f, 0), ST_ERR_USAGE);
    const char *const reserved[] = {"part_features", "1"};
    assert_int_equal(st_part_write_info(w, reserved, 1), ST_ERR_USAGE);
    const char *const twice[] = {"tile", "a", "tile", "b"};
    assert_int_equal(st_part_write_info(w, twice, 2), ST_ERR_USAGE);
    assert_int_equal(d.count, 5);
    for (size_t i = 0; i < d.count; i++)
        assert_string_equal(d.items[i].file, path);   /* the final name, not the temporary */
    assert_non_null(strstr(d.items[0].message, "bid 4"));
    /* the writer goes on after those and commits what was accepted */
    assert_int_equal(st_part_writer_commit(w), ST_OK);
    assert_int_equal(st_part_writer_commit(w), ST_ERR_USAGE);
    assert_int_equal(st_part_write_feature(w, f, 0), ST_ERR_USAGE);
    st_part_writer_close(w);
    st_part *p = NULL;
    st_strtab *strings = st_strtab_new(0, 0);
    assert_int_equal(st_part_open(path, &d, &p), ST_OK);
    st_feature *g = NULL;
    int shared;
    assert_int_equal(st_part_next_feature(p, strings, &g, &shared), ST_OK);
    assert_true(g && g->bid == 4);
    st_feature_free(g);
    assert_int_equal(st_part_next_feature(p, strings, &g, &shared), ST_OK);
    assert_null(g);
    assert_string_equal(st_part_info(p, "tile"), "a");
    st_part_close(p);
    st_strtab_free(strings);
    /* a folder that does not exist */
    char bad[300];
    snprintf(bad, sizeof bad, "%s/no/such/dir/p.gpkg", dir);
    size_t before = d.count;
    assert_int_equal(st_part_writer_open(bad, &d, &w), ST_ERR_IO);
    assert_null(w);
    assert_int_equal(d.count, before + 1);
    assert_string_equal(d.items[before].file, bad);
    st_feature_free(f);
    st_diags_free(&d);
}

/* Open 'path' expecting 'want' and one diagnostic naming the file whose
** message contains 'words'. */
static void expect_open_fails(const char *path, st_status want, const char *words)
{
    st_diags d;
    st_diags_init(&d);
    st_part *p = (st_part *)1;
    assert_int_equal(st_part_open(path, &d, &p), want);
    assert_null(p);
    assert_int_equal(d.count, 1);
    assert_string_equal(d.items[0].file, path);
    if (!strstr(d.items[0].message, words))
        fail_msg("'%s' not in '%s'", words, d.items[0].message);
    st_diags_free(&d);
}

static void sql(const char *path, const char *statement)
{
    sqlite3 *db = NULL;
    assert_int_equal(sqlite3_open(path, &db), SQLITE_OK);
    char *err = NULL;
    if (sqlite3_exec(db, statement, NULL, NULL, &err) != SQLITE_OK)
        fail_msg("%s: %s", statement, err);
    sqlite3_close(db);
}

static void copy_file(const char *from, const char *to, long bytes)
{
    FILE *in = fopen(from, "rb"), *out = fopen(to, "wb");
    assert_non_null(in);
    assert_non_null(out);
    int c;
    for (long i = 0; (bytes < 0 || i < bytes) && (c = fgetc(in)) != EOF; i++)
        fputc(c, out);
    fclose(in);
    fclose(out);
}

static void test_part_open_refuses_non_parts(void **state)
{
    fixture *fx = *state;
    char dir[128], path[256], other[256];
    subdir(fx, "nonparts", dir, sizeof dir);
    /* a text file, an empty file, a missing file, a folder */
    snprintf(path, sizeof path, "%s/notes.gpkg", dir);
    FILE *f = fopen(path, "w");
    fputs("this is not a part\n", f);
    fclose(f);
    expect_open_fails(path, ST_ERR_FORMAT, "not an SQLite database");
    snprintf(path, sizeof path, "%s/empty.gpkg", dir);
    fclose(fopen(path, "w"));
    expect_open_fails(path, ST_ERR_FORMAT, "not an SQLite database");
    snprintf(path, sizeof path, "%s/missing.gpkg", dir);
    expect_open_fails(path, ST_ERR_IO, "cannot open");
    expect_open_fails(dir, ST_ERR_IO, "not a regular file");
    /* an SQLite file that is not a GeoPackage */
    snprintf(path, sizeof path, "%s/plain.sqlite", dir);
    sql(path, "CREATE TABLE t (a)");
    expect_open_fails(path, ST_ERR_FORMAT, "not a GeoPackage");
    /* a GeoPackage that is not a part */
    snprintf(path, sizeof path, "%s/layer.gpkg", dir);
    sql(path, "PRAGMA application_id = 1196444487; PRAGMA user_version = 10200;"
              "CREATE TABLE gpkg_contents (table_name TEXT);"
              "CREATE TABLE buildings (fid INTEGER PRIMARY KEY)");
    expect_open_fails(path, ST_ERR_FORMAT, "without a part_info table");
    /* a GeoPackage as the project writes its outputs */
    snprintf(path, sizeof path, "%s/out.gpkg", dir);
    st_diags d;
    st_diags_init(&d);
    st_writer *gw = NULL;
    st_fields fields;
    st_fields_init(&fields);
    st_feature *one = make_feature(F_HOLES, 1);
    assert_int_equal(st_writer_open(path, &d, &gw), ST_OK);
    assert_int_equal(st_writer_begin_layer(gw, "buildings", &fields, ST_GEOM_POLYGON), ST_OK);
    assert_int_equal(st_writer_write(gw, one), ST_OK);
    assert_int_equal(st_writer_commit(gw), ST_OK);
    st_writer_close(gw);
    st_feature_free(one);
    expect_open_fails(path, ST_ERR_FORMAT, "without a part_info table");
    /* a part of another format version, and one with no version */
    snprintf(path, sizeof path, "%s/p.gpkg", dir);
    assert_int_equal(write_sample(path, &d, 1), ST_OK);
    snprintf(other, sizeof other, "%s/v2.gpkg", dir);
    copy_file(path, other, -1);
    sql(other, "UPDATE part_info SET value = '2' WHERE key = 'part_format'");
    expect_open_fails(other, ST_ERR_FORMAT, "part format '2'");
    sql(other, "DELETE FROM part_info WHERE key = 'part_format'");
    expect_open_fails(other, ST_ERR_FORMAT, "no 'part_format'");
    /* unfinished: the counts a commit records are missing */
    copy_file(path, other, -1);
    sql(other, "DELETE FROM part_info WHERE key = 'part_features'");
    expect_open_fails(other, ST_ERR_FORMAT, "'part_features'");
    /* a table missing */
    copy_file(path, other, -1);
    sql(other, "DROP TABLE part_fields");
    expect_open_fails(other, ST_ERR_FORMAT, "damaged");
    /* cut short */
    struct stat st;
    assert_int_equal(stat(path, &st), 0);
    copy_file(path, other, (long)st.st_size - 100);
    expect_open_fails(other, ST_ERR_FORMAT, "truncated");
    copy_file(path, other, 50);
    expect_open_fails(other, ST_ERR_FORMAT, "truncated");
    /* a field row pointing at no layer */
    copy_file(path, other, -1);
    sql(other, "UPDATE part_fields SET layer = 9 WHERE id = 1");
    expect_open_fails(other, ST_ERR_FORMAT, "part_fields");
    st_diags_free(&d);
}

/* Read every feature of 'path': the walk's final status; *diag the first
** diagnostic's message (owned) when there is one. */
static st_status walk(const char *path, char **diag)
{
    st_diags d;
    st_diags_init(&d);
    st_strtab *strings = st_strtab_new(0, 0);
    st_part *p = NULL;
    st_status rc = st_part_open(path, &d, &p);
    st_feature *f = NULL;
    int shared;
    while (rc == ST_OK && (rc = st_part_next_feature(p, strings, &f, &shared)) == ST_OK && f)
        st_feature_free(f);
    if (rc != ST_OK && p) {
        /* refused again, no new diagnostic */
        size_t n = d.count;
        assert_int_equal(st_part_next_feature(p, strings, &f, &shared), rc);
        assert_null(f);
        assert_int_equal(d.count, n);
    }
    *diag = NULL;
    if (d.count) {
        assert_string_equal(d.items[0].file, path);
        *diag = st_strdup(d.items[0].message);
    }
    st_part_close(p);
    st_strtab_free(strings);
    st_diags_free(&d);
    return rc;
}

static void test_part_damaged_records(void **state)
{
    fixture *fx = *state;
    char dir[128], path[256], other[256];
    subdir(fx, "damaged", dir, sizeof dir);
    snprintf(path, sizeof path, "%s/p.gpkg", dir);
    snprintf(other, sizeof other, "%s/d.gpkg", dir);
    st_diags d;
    st_diags_init(&d);
    assert_int_equal(write_sample(path, &d, 1), ST_OK);
    static const struct {
        const char *sql, *words;
    } cases[] = {
        {"UPDATE part_features SET data = substr(data, 1, 20) WHERE bid = 5",
         "bid 5: the stored feature is damaged"},
        {"UPDATE part_features SET data = CAST(data || x'00' AS BLOB) WHERE bid = 7",
         "bid 7: the stored feature is damaged"},
        {"UPDATE part_features SET bid = 8 WHERE bid = 7",
         "bid 8: the stored feature is damaged (it holds bid 7)"},
        {"UPDATE part_features SET data = 'text' WHERE bid = 2", "bid 2:"},
        {"UPDATE part_features SET shared = 2 WHERE bid = 2", "bid 2:"},
        {"DELETE FROM part_features WHERE bid = 9", "holds 4 features, 5 were committed"},
    };
    for (size_t i = 0; i < sizeof cases / sizeof cases[0]; i++) {
        copy_file(path, other, -1);
        sql(other, cases[i].sql);
        char *msg = NULL;
        assert_int_equal(walk(other, &msg), ST_ERR_FORMAT);
        assert_non_null(msg);
        if (!strstr(msg, cases[i].words))
            fail_msg("case %zu: '%s' not in '%s'", i, cases[i].words, msg);
        st_free(msg);
    }
    /* findings and unmapped rows are checked too */
    static const char *const more[] = {
        "DELETE FROM part_findings WHERE seq = 2",
        "UPDATE part_findings SET severity = 3 WHERE seq = 1",
        "UPDATE part_findings SET x = 'east' WHERE seq = 1",
        "DELETE FROM part_unmapped WHERE id = 1",
        "UPDATE part_unmapped SET count = 'many' WHERE id = 1",
    };
    for (size_t i = 0; i < sizeof more / sizeof more[0]; i++) {
        copy_file(path, other, -1);
        sql(other, more[i]);
        st_diags_init(&d);
        st_status rc = read_all(other, &d, 0);
        assert_int_equal(rc, ST_ERR_FORMAT);
        assert_int_equal(d.count, 1);
        assert_string_equal(d.items[0].file, other);
        st_diags_free(&d);
    }
    /* a failed findings read appends nothing */
    copy_file(path, other, -1);
    sql(other, "UPDATE part_findings SET severity = 7 WHERE seq = 3");
    st_strtab *strings = st_strtab_new(0, 0);
    st_part *p = NULL;
    st_findings got;
    st_findings_init(&got);
    assert_int_equal(st_findings_add(&got, 1, "x.y", ST_SEV_NOTE, 0, 0, "kept"), ST_OK);
    assert_int_equal(st_part_open(other, &d, &p), ST_OK);
    assert_int_equal(st_part_read_findings(p, strings, &got), ST_ERR_FORMAT);
    assert_int_equal(got.count, 1);
    st_part_close(p);
    st_findings_free(&got);
    st_strtab_free(strings);
    st_diags_free(&d);
}

static void test_part_nomem(void **state)
{
    fixture *fx = *state;
    char dir[128], path[256];
    subdir(fx, "nomem", dir, sizeof dir);
    snprintf(path, sizeof path, "%s/p.gpkg", dir);
    sample s;
    sample_make(&s);
    long n;
    for (n = 1; n < 100000; n++) {
        st_diags d;
        st_diags_init(&d);
        st_alloc_fail_after(n);
        st_status rc = write_sample_from(path, &d, 1, &s);
        long used = st_alloc_count();
        st_alloc_fail_after(0);
        st_diags_free(&d);
        if (rc == ST_OK) {
            assert_true(used < n);
            break;
        }
        if (rc != ST_ERR_NOMEM)
            fail_msg("writing, allocation %ld failed: status %d", n, rc);
        assert_int_equal(count_entries(dir), 0);
    }
    sample_free(&s);
    assert_true(n > 5);
    assert_int_equal(count_entries(dir), 1);
    for (n = 1; n < 100000; n++) {
        st_diags d;
        st_diags_init(&d);
        st_alloc_fail_after(n);
        st_status rc = read_all(path, &d, 0);
        long used = st_alloc_count();
        st_alloc_fail_after(0);
        st_diags_free(&d);
        if (rc == ST_OK) {
            assert_true(used < n);
            break;
        }
        if (rc != ST_ERR_NOMEM)
            fail_msg("reading, allocation %ld failed: status %d", n, rc);
    }
    assert_true(n > 20);
    /* and the full check passes after all that */
    st_diags d;
    st_diags_init(&d);
    assert_int_equal(read_all(path, &d, 1), ST_OK);
    st_diags_free(&d);
}

static void test_part_walk_stops_after_a_failure(void **state)
{
    fixture *fx = *state;
    char dir[128], path[256];
    subdir(fx, "walkstop", dir, sizeof dir);
    snprintf(path, sizeof path, "%s/p.gpkg", dir);
    st_diags d;
    st_diags_init(&d);
    assert_int_equal(write_sample(path, &d, 1), ST_OK);
    st_strtab *strings = st_strtab_new(0, 0);
    st_part *p = NULL;
    assert_int_equal(st_part_open(path, &d, &p), ST_OK);
    st_feature *f = NULL;
    int shared;
    assert_int_equal(st_part_next_feature(p, strings, &f, &shared), ST_OK);
    assert_true(f && f->bid == 1);
    st_feature_free(f);
    st_alloc_fail_after(1);   /* the record of bid 2 cannot be decoded */
    assert_int_equal(st_part_next_feature(p, strings, &f, &shared), ST_ERR_NOMEM);
    st_alloc_fail_after(0);
    assert_null(f);
    /* no silent skip to bid 5: the walk stays failed */
    assert_int_equal(st_part_next_feature(p, strings, &f, &shared), ST_ERR_NOMEM);
    assert_null(f);
    st_part_close(p);
    st_strtab_free(strings);
    assert_int_equal(d.count, 0);
    st_diags_free(&d);
}

static int have_file(const char *p)
{
    struct stat st;
    return stat(p, &st) == 0;
}

static void test_part_is_a_geopackage_for_gdal(void **state)
{
    fixture *fx = *state;
    if (!have_file(VALIDATE) || !have_file(PY) ||
        system(PY " -c 'import osgeo.ogr' 2>/dev/null") != 0)
        skip();
    char dir[128], path[256], cmd[600];
    subdir(fx, "gdal", dir, sizeof dir);
    snprintf(path, sizeof path, "%s/p.gpkg", dir);
    st_diags d;
    st_diags_init(&d);
    assert_int_equal(write_sample(path, &d, 1), ST_OK);
    st_diags_free(&d);
    int status;
    snprintf(cmd, sizeof cmd, PY " " VALIDATE " --extra '%s' 2>&1", path);
    char *out = run(cmd, &status);
    if (status != 0)
        fail_msg("validate_gpkg.py: %s", out);
    st_free(out);
    /* GDAL lists the attribute tables and counts their rows */
    snprintf(cmd, sizeof cmd, PY " -c \"from osgeo import ogr; ds = ogr.Open('%s');"
             "print(' '.join('%%s:%%d' %% (l.GetName(), l.GetFeatureCount()) for l in ds))\"",
             path);
    out = run(cmd, &status);
    assert_int_equal(status, 0);
    assert_non_null(strstr(out, "part_info:9"));
    assert_non_null(strstr(out, "part_features:5"));
    assert_non_null(strstr(out, "part_findings:3"));
    assert_non_null(strstr(out, "part_fields:4"));
    st_free(out);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_codec_round_trip_every_kind),
        cmocka_unit_test(test_codec_appends_to_the_buffer),
        cmocka_unit_test(test_codec_values_and_rules),
        cmocka_unit_test(test_codec_encode_refuses_inconsistent),
        cmocka_unit_test(test_codec_every_truncation),
        cmocka_unit_test(test_codec_bit_flips_and_mutations),
        cmocka_unit_test(test_codec_hostile_records),
        cmocka_unit_test(test_codec_nomem),
        cmocka_unit_test(test_part_round_trip),
        cmocka_unit_test(test_part_without_commit_leaves_nothing),
        cmocka_unit_test(test_part_writer_refusals),
        cmocka_unit_test(test_part_open_refuses_non_parts),
        cmocka_unit_test(test_part_damaged_records),
        cmocka_unit_test(test_part_nomem),
        cmocka_unit_test(test_part_walk_stops_after_a_failure),
        cmocka_unit_test(test_part_is_a_geopackage_for_gdal),
    };
    return cmocka_run_group_tests_name("part", tests, group_setup, group_teardown);
}
