/*
** neighbours/nb_canon.c -- the canonical form of a footprint and its
** 64-bit hash, so exact duplicates are found by sorting hashes instead of
** comparing every pair.
**
** Input:   an st_geom (borrowed); only its parts, rings and coordinates
**          are read, not its type, so a one-part multipolygon has the form
**          of the same polygon.
** Output:  words in an st_nb_canon (layout in neighboursInt.h). Two
**          footprints are the same building outline exactly when their
**          words are equal; the hash only narrows the search, equality is
**          always confirmed on the words.
** Rules:   each ring loses its closing vertex (when closed), is oriented
**          (shells counter-clockwise, holes clockwise, by the sign of its
**          shoelace area) and starts at its smallest vertex (x, then y);
**          when that vertex occurs several times the smallest rotation
**          wins. Holes within a part, then parts, are sorted by their
**          vertex sequences. -0.0 is written as 0.0. Repeated vertices are
**          kept: removing them is the footprint stage's repair.
** Errors:  ST_ERR_NOMEM.
** Limits:  ties on the smallest vertex are resolved among the first
**          MAX_TIES occurrences only (a ring touching itself there more
**          often than that is not a footprint; at worst an exact duplicate
**          is then found as a near-duplicate with IoU 1).
*/
#include <string.h>

#include "neighboursInt.h"

#define MAX_TIES 64

void st_nb_canon_init(st_nb_canon *c)
{
    memset(c, 0, sizeof *c);
}

void st_nb_canon_free(st_nb_canon *c)
{
    st_free(c->words);
    st_free(c->xy);
    st_free(c->len);
    st_free(c->ring_order);
    st_free(c->part_order);
    st_free(c->tmp);
    st_nb_canon_init(c);
}

/* Make *arr hold at least 'need' items of 'size' bytes. */
static st_status reserve(void **arr, size_t *cap, size_t need, size_t size)
{
    if (need <= *cap)
        return ST_OK;
    size_t c = *cap ? *cap : 16;
    while (c < need)
        c *= 2;
    void *p = st_realloc(*arr, c * size);
    if (!p)
        return ST_ERR_NOMEM;
    *arr = p;
    *cap = c;
    return ST_OK;
}

static int point_cmp(const double *p, const double *q)
{
    if (p[0] != q[0])
        return p[0] < q[0] ? -1 : 1;
    if (p[1] != q[1])
        return p[1] < q[1] ? -1 : 1;
    return 0;
}

/* Source vertex of the oriented ring at step t (0 <= t < n). */
static const double *oriented(const double *src, uint32_t n, int reverse, uint32_t t)
{
    return src + 2 * (size_t)(reverse ? (n - t) % n : t);
}

/* Compare the rotations starting at steps s and t of the oriented ring. */
static int rotation_cmp(const double *src, uint32_t n, int reverse,
                        uint32_t s, uint32_t t)
{
    for (uint32_t k = 0; k < n; k++) {
        int c = point_cmp(oriented(src, n, reverse, (s + k) % n),
                          oriented(src, n, reverse, (t + k) % n));
        if (c)
            return c;
    }
    return 0;
}

/* Write the canonical ring r of g to out; returns its vertex count. */
static uint32_t canon_ring(const st_geom *g, uint32_t r, int shell, double *out)
{
    uint32_t a = g->ring_coord[r], n = g->ring_coord[r + 1] - a;
    const double *src = g->xy + 2 * (size_t)a;
    if (n >= 2 && point_cmp(src, src + 2 * (size_t)(n - 1)) == 0)
        n--;
    if (n == 0)
        return 0;
    /* The shoelace over the open ring equals the closed one: the closing
    ** edge adds nothing when measured from the first vertex. */
    double area = st_geom_ring_signed_area(g, r);
    int reverse = shell ? area < 0 : area > 0;
    uint32_t best = 0, ties = 0;
    for (uint32_t t = 1; t < n; t++) {
        int c = point_cmp(oriented(src, n, reverse, t), oriented(src, n, reverse, best));
        if (c < 0) {
            best = t;
            ties = 0;
        } else if (c == 0 && ++ties <= MAX_TIES &&
                   rotation_cmp(src, n, reverse, t, best) < 0) {
            best = t;
        }
    }
    for (uint32_t k = 0; k < n; k++) {
        const double *v = oriented(src, n, reverse, (best + k) % n);
        out[2 * k] = v[0] == 0.0 ? 0.0 : v[0];      /* -0.0 -> 0.0 */
        out[2 * k + 1] = v[1] == 0.0 ? 0.0 : v[1];
    }
    return n;
}

/* ---- ordering of holes and parts ----------------------------------------- */

typedef struct order_ctx {
    const st_geom *g;
    const st_nb_canon *c;
} order_ctx;

static int ring_cmp(const order_ctx *x, uint32_t r, uint32_t s)
{
    const double *p = x->c->xy + 2 * (size_t)x->g->ring_coord[r];
    const double *q = x->c->xy + 2 * (size_t)x->g->ring_coord[s];
    uint32_t n = x->c->len[r], m = x->c->len[s];
    for (uint32_t k = 0; k < n && k < m; k++) {
        int cmp = point_cmp(p + 2 * (size_t)k, q + 2 * (size_t)k);
        if (cmp)
            return cmp;
    }
    return n < m ? -1 : n > m ? 1 : 0;
}

/* Parts compare by shell, then hole count, then holes in their order. */
static int part_cmp(const order_ctx *x, uint32_t p, uint32_t q)
{
    const uint32_t *pr = x->g->part_ring, *ro = x->c->ring_order;
    uint32_t np = pr[p + 1] - pr[p], nq = pr[q + 1] - pr[q];
    if (np == 0 || nq == 0)
        return np < nq ? -1 : np > nq ? 1 : 0;
    int c = ring_cmp(x, ro[pr[p]], ro[pr[q]]);
    if (c)
        return c;
    if (np != nq)
        return np < nq ? -1 : 1;
    for (uint32_t k = 1; k < np; k++)
        if ((c = ring_cmp(x, ro[pr[p] + k], ro[pr[q] + k])) != 0)
            return c;
    return 0;
}

typedef int (*cmp_fn)(const order_ctx *x, uint32_t a, uint32_t b);

/* Stable merge sort of v[0..n) with tmp as scratch (a context comparator
** is what qsort lacks). */
static void merge_sort(uint32_t *v, uint32_t *tmp, size_t n, cmp_fn cmp,
                       const order_ctx *x)
{
    if (n < 2)
        return;
    if (n <= 8) {
        for (size_t i = 1; i < n; i++) {
            uint32_t e = v[i];
            size_t j = i;
            for (; j > 0 && cmp(x, v[j - 1], e) > 0; j--)
                v[j] = v[j - 1];
            v[j] = e;
        }
        return;
    }
    size_t h = n / 2, i = 0, j = h, k = 0;
    merge_sort(v, tmp, h, cmp, x);
    merge_sort(v + h, tmp, n - h, cmp, x);
    while (i < h && j < n)
        tmp[k++] = cmp(x, v[j], v[i]) < 0 ? v[j++] : v[i++];
    while (i < h)
        tmp[k++] = v[i++];
    while (j < n)
        tmp[k++] = v[j++];
    memcpy(v, tmp, n * sizeof *v);
}

/* ---- building the words --------------------------------------------------- */

/* len and ring_order grow together (one capacity for both). */
static st_status reserve_rings(st_nb_canon *c, size_t need)
{
    if (need <= c->cap_rings)
        return ST_OK;
    size_t cap = c->cap_rings ? c->cap_rings : 16;
    while (cap < need)
        cap *= 2;
    uint32_t *len = st_realloc(c->len, cap * sizeof *len);
    if (!len)
        return ST_ERR_NOMEM;
    c->len = len;
    uint32_t *order = st_realloc(c->ring_order, cap * sizeof *order);
    if (!order)
        return ST_ERR_NOMEM;
    c->ring_order = order;
    c->cap_rings = cap;
    return ST_OK;
}

static st_status reserve_all(st_nb_canon *c, const st_geom *g, size_t nwords)
{
    size_t most = g->nrings > g->nparts ? g->nrings : g->nparts;
    st_status rc = reserve((void **)&c->words, &c->cap_words, nwords, sizeof *c->words);
    if (rc == ST_OK)
        rc = reserve((void **)&c->xy, &c->cap_xy, 2 * (size_t)g->ncoords + 1, sizeof *c->xy);
    if (rc == ST_OK)
        rc = reserve_rings(c, (size_t)g->nrings + 1);
    if (rc == ST_OK)
        rc = reserve((void **)&c->part_order, &c->cap_parts, (size_t)g->nparts + 1,
                     sizeof *c->part_order);
    if (rc == ST_OK)
        rc = reserve((void **)&c->tmp, &c->cap_tmp, most + 1, sizeof *c->tmp);
    return rc;
}

static void put_word(st_nb_canon *c, uint64_t w)
{
    c->words[c->nwords++] = w;
}

static void put_double(st_nb_canon *c, double d)
{
    uint64_t w;
    memcpy(&w, &d, sizeof w);
    put_word(c, w);
}

st_status st_nb_canon_build(st_nb_canon *c, const st_geom *g)
{
    size_t nwords = 1 + (size_t)g->nparts + (size_t)g->nrings + 2 * (size_t)g->ncoords;
    c->nwords = 0;
    st_status rc = reserve_all(c, g, nwords);
    if (rc != ST_OK)
        return rc;
    for (uint32_t p = 0; p < g->nparts; p++)
        for (uint32_t r = g->part_ring[p]; r < g->part_ring[p + 1]; r++) {
            c->len[r] = canon_ring(g, r, r == g->part_ring[p],
                                   c->xy + 2 * (size_t)g->ring_coord[r]);
            c->ring_order[r] = r;
        }
    order_ctx x = {g, c};
    for (uint32_t p = 0; p < g->nparts; p++) {
        uint32_t r0 = g->part_ring[p], r1 = g->part_ring[p + 1];
        if (r1 - r0 > 2)
            merge_sort(c->ring_order + r0 + 1, c->tmp, r1 - r0 - 1, ring_cmp, &x);
        c->part_order[p] = p;
    }
    merge_sort(c->part_order, c->tmp, g->nparts, part_cmp, &x);

    put_word(c, g->nparts);
    for (uint32_t k = 0; k < g->nparts; k++) {
        uint32_t p = c->part_order[k];
        put_word(c, g->part_ring[p + 1] - g->part_ring[p]);
        for (uint32_t i = g->part_ring[p]; i < g->part_ring[p + 1]; i++) {
            uint32_t r = c->ring_order[i];
            const double *v = c->xy + 2 * (size_t)g->ring_coord[r];
            put_word(c, c->len[r]);
            for (uint32_t j = 0; j < 2 * c->len[r]; j++)
                put_double(c, v[j]);
        }
    }
    return ST_OK;
}

uint64_t st_nb_canon_hash(const st_nb_canon *c)
{
    /* Multiply-xorshift over whole words, then the splitmix64 finaliser:
    ** fast, and well mixed enough to narrow candidates (equality is always
    ** confirmed on the words). */
    uint64_t h = 0x243F6A8885A308D3ull ^ c->nwords;
    for (size_t i = 0; i < c->nwords; i++) {
        h ^= c->words[i];
        h *= 0x9E3779B97F4A7C15ull;
        h ^= h >> 32;
    }
    h ^= h >> 30;
    h *= 0xBF58476D1CE4E5B9ull;
    h ^= h >> 27;
    h *= 0x94D049BB133111EBull;
    h ^= h >> 31;
    return h;
}

int st_nb_canon_equal(const st_nb_canon *a, const st_nb_canon *b)
{
    return a->nwords == b->nwords &&
           memcmp(a->words, b->words, a->nwords * sizeof *a->words) == 0;
}
