/*
** footprint/fpring.c -- what can be learnt from the rings before GEOS sees
** them (GEOS refuses unclosed rings and rings of fewer than 4 positions),
** and the cleaning that makes every ring acceptable to it.
**
** Input:   polygonal st_geom (borrowed), finite coordinates.
** Output:  an fp_scan summary; a cleaned copy of the geometry.
** Errors:  ST_ERR_NOMEM only (the vertex index scratch grows).
** Limits:  the caller has bounded the coordinate count
**          (ST_FOOTPRINT_MAX_COORDS).
*/
#include <math.h>
#include <string.h>

#include "fpInt.h"

static int same_xy(const double *xy, uint32_t i, uint32_t j)
{
    return xy[2 * i] == xy[2 * j] && xy[2 * i + 1] == xy[2 * j + 1];
}

static st_status reserve_idx(st_footprint_checker *ck, size_t n)
{
    if (n <= ck->idx_cap)
        return ST_OK;
    size_t cap = ck->idx_cap ? ck->idx_cap : 64;
    while (cap < n)
        cap *= 2;
    uint32_t *p = st_realloc(ck->idx, cap * sizeof *p);
    if (!p)
        return ST_ERR_NOMEM;
    ck->idx = p;
    ck->idx_cap = cap;
    return ST_OK;
}

/* A ring's positions [a, b) and what they are without repetition. */
typedef struct ring_walk {
    uint32_t a, b;
    int closed;          /* last position equals the first */
    uint32_t open_len;   /* positions without the closing one */
    uint32_t distinct;   /* ck->idx[0..distinct): vertices, no consecutive
                            repeats, cyclically (last != first) */
    uint32_t first_repeat;  /* index of the first repeated vertex, or b */
} ring_walk;

static st_status walk_ring(st_footprint_checker *ck, const st_geom *g, uint32_t r,
                           ring_walk *w)
{
    w->a = g->ring_coord[r];
    w->b = g->ring_coord[r + 1];
    uint32_t len = w->b - w->a;
    w->closed = len >= 2 && same_xy(g->xy, w->a, w->b - 1);
    w->open_len = w->closed ? len - 1 : len;
    w->distinct = 0;
    w->first_repeat = w->b;
    st_status rc = reserve_idx(ck, w->open_len ? w->open_len : 1);
    if (rc != ST_OK)
        return rc;
    for (uint32_t i = w->a; i < w->a + w->open_len; i++) {
        if (w->distinct && same_xy(g->xy, ck->idx[w->distinct - 1], i)) {
            if (w->first_repeat == w->b)
                w->first_repeat = i;
            continue;
        }
        ck->idx[w->distinct++] = i;
    }
    /* An unclosed ring that ends on its first vertex twice over, or a
    ** closed one whose last open vertex repeats the first. */
    while (w->distinct > 1 && same_xy(g->xy, ck->idx[w->distinct - 1], ck->idx[0])) {
        if (w->first_repeat == w->b)
            w->first_repeat = ck->idx[w->distinct - 1];
        w->distinct--;
    }
    return ST_OK;
}

/* Difference of longitudes taken the short way round. */
static double dlon(double x1, double x0)
{
    double d = x1 - x0;
    if (d > 180.0)
        d -= 360.0;
    else if (d < -180.0)
        d += 360.0;
    return d;
}

/* Angle (degrees) between the edges from vertex j to i and to k, in a
** local plane (east scaled by the cosine of the latitude). */
static double vertex_angle(const double *xy, uint32_t i, uint32_t j, uint32_t k)
{
    double kx = cos(xy[2 * j + 1] * M_PI / 180.0);
    double ux = dlon(xy[2 * i], xy[2 * j]) * kx, uy = xy[2 * i + 1] - xy[2 * j + 1];
    double vx = dlon(xy[2 * k], xy[2 * j]) * kx, vy = xy[2 * k + 1] - xy[2 * j + 1];
    return atan2(fabs(ux * vy - uy * vx), ux * vx + uy * vy) * 180.0 / M_PI;
}

static void set_xy(double dst[2], const double *xy, uint32_t i)
{
    dst[0] = xy[2 * i];
    dst[1] = xy[2 * i + 1];
}

static void scan_spikes(const st_footprint_checker *ck, const st_geom *g,
                        const ring_walk *w, double spike_deg, fp_scan *s)
{
    uint32_t n = w->distinct;
    for (uint32_t t = 0; t < n; t++) {
        uint32_t i = ck->idx[(t + n - 1) % n], j = ck->idx[t], k = ck->idx[(t + 1) % n];
        double angle = vertex_angle(g->xy, i, j, k);
        if (angle >= spike_deg)
            continue;
        if (s->spikes++ == 0)
            set_xy(s->spike_xy, g->xy, j);
        s->spike_angle_deg = fmin(s->spike_angle_deg, angle);
    }
}

static int ring_crosses(const st_geom *g, uint32_t a, uint32_t b)
{
    for (uint32_t i = a; i < b; i++) {
        uint32_t j = i + 1 < b ? i + 1 : a;   /* the closing edge too */
        if (fabs(g->xy[2 * j] - g->xy[2 * i]) > 180.0)
            return 1;
    }
    return 0;
}

st_status st_fp_scan_rings(st_footprint_checker *ck, const st_geom *g, double spike_deg,
                        fp_scan *s)
{
    memset(s, 0, sizeof *s);
    s->spike_angle_deg = INFINITY;
    s->unclosed_xy[0] = s->unclosed_xy[1] = NAN;
    s->repeated_xy[0] = s->repeated_xy[1] = NAN;
    s->too_few_xy[0] = s->too_few_xy[1] = NAN;
    s->spike_xy[0] = s->spike_xy[1] = NAN;
    for (uint32_t r = 0; r < g->nrings; r++) {
        ring_walk w;
        st_status rc = walk_ring(ck, g, r, &w);
        if (rc != ST_OK)
            return rc;
        if (!w.closed && w.b - w.a >= 2 && s->unclosed++ == 0)
            set_xy(s->unclosed_xy, g->xy, w.b - 1);
        if (w.b - w.a < 4)
            s->short_rings++;
        uint32_t repeats = w.open_len - w.distinct;
        if (repeats && w.distinct) {
            if (s->repeated == 0)
                set_xy(s->repeated_xy, g->xy, w.first_repeat);
            s->repeated += repeats;
        }
        if (w.distinct < 3) {
            if (s->too_few++ == 0 && w.b > w.a)
                set_xy(s->too_few_xy, g->xy, w.a);
        } else if (spike_deg > 0.0) {
            scan_spikes(ck, g, &w, spike_deg, s);
        }
        s->crosses |= ring_crosses(g, w.a, w.b);
    }
    return ST_OK;
}

/* Append ring r of src to dst as a closed ring without repeats; the walk
** has already filled ck->idx. */
static st_status emit_ring(const st_footprint_checker *ck, const st_geom *src,
                           const ring_walk *w, st_geom *dst)
{
    st_status rc = st_geom_begin_ring(dst);
    for (uint32_t t = 0; rc == ST_OK && t <= w->distinct; t++) {
        uint32_t i = ck->idx[t < w->distinct ? t : 0];
        rc = st_geom_add_xy(dst, src->xy[2 * i], src->xy[2 * i + 1]);
    }
    return rc;
}

static st_status clean_part(st_footprint_checker *ck, const st_geom *src, uint32_t p,
                            st_geom *dst, uint32_t *dropped)
{
    uint32_t r0 = src->part_ring[p], r1 = src->part_ring[p + 1];
    for (uint32_t r = r0; r < r1; r++) {
        ring_walk w;
        st_status rc = walk_ring(ck, src, r, &w);
        if (rc != ST_OK)
            return rc;
        if (w.distinct < 3) {
            if (r == r0) {            /* no shell, no polygon: holes go too */
                *dropped += r1 - r0;
                return ST_OK;
            }
            (*dropped)++;
            continue;
        }
        if (r == r0 && (rc = st_geom_begin_part(dst)) != ST_OK)
            return rc;
        if ((rc = emit_ring(ck, src, &w, dst)) != ST_OK)
            return rc;
    }
    return ST_OK;
}

st_status st_fp_clean(st_footprint_checker *ck, const st_geom *src, st_geom *dst,
                   uint32_t *dropped)
{
    st_geom_clear(dst);
    *dropped = 0;
    for (uint32_t p = 0; p < src->nparts; p++) {
        st_status rc = clean_part(ck, src, p, dst, dropped);
        if (rc != ST_OK) {
            st_geom_clear(dst);
            return rc;
        }
    }
    dst->type = src->type == ST_GEOM_POLYGON ? ST_GEOM_POLYGON : ST_GEOM_MULTIPOLYGON;
    dst->has_z = src->has_z;
    dst->has_m = src->has_m;
    return ST_OK;
}

void st_fp_swap_axes(st_geom *g)
{
    for (uint32_t i = 0; i < g->ncoords; i++) {
        double t = g->xy[2 * i];
        g->xy[2 * i] = g->xy[2 * i + 1];
        g->xy[2 * i + 1] = t;
    }
}

void st_fp_unwrap(st_geom *g)
{
    for (uint32_t i = 0; i < g->ncoords; i++)
        if (g->xy[2 * i] < 0.0)
            g->xy[2 * i] += 360.0;
}

double st_fp_rewrap_lon(double x)
{
    return x > 180.0 ? x - 360.0 : x;
}

void st_fp_rewrap(st_geom *g)
{
    for (uint32_t i = 0; i < g->ncoords; i++)
        g->xy[2 * i] = st_fp_rewrap_lon(g->xy[2 * i]);
}
