/*
** footprint/fpmeasure.c -- geodesic area and perimeter on WGS 84,
** compactness, and a layer's robust extent.
**
** Input:   st_geom in lon/lat degrees (borrowed).
** Output:  m^2 and m, computed with PROJ's geodesic routines (Karney's
**          algorithm, the one behind pyproj's Geod), ring by ring.
** Errors:  non-finite coordinates give NAN; the extent can run out of
**          memory (ST_ERR_NOMEM).
** Why geodesic: footprints arrive in lon/lat from every part of the world;
** any one map projection distorts area somewhere (REFERENCES.md section 2,
** row 16: a UTM rectangle's "planar" area is off by the scale factor).
*/
#include <math.h>
#include <stdlib.h>

#include "fpInt.h"

void st_fp_ring_measure(const st_footprint_checker *ck, const st_geom *g, uint32_t r,
                     double *area, double *perimeter)
{
    struct geod_polygon poly;
    geod_polygon_init(&poly, 0);
    for (uint32_t i = g->ring_coord[r]; i < g->ring_coord[r + 1]; i++)
        geod_polygon_addpoint(&ck->geod, &poly, g->xy[2 * i + 1], g->xy[2 * i]);
    /* reverse = 0, sign = 1: a clockwise ring gives a negative area instead
    ** of "the rest of the Earth"; footprints are far smaller than a
    ** hemisphere, so the absolute value is the ring's area. */
    geod_polygon_compute(&ck->geod, &poly, 0, 1, area, perimeter);
}

double st_fp_part_area(const st_footprint_checker *ck, const st_geom *g, uint32_t p)
{
    double total = 0.0, a, len;
    for (uint32_t r = g->part_ring[p]; r < g->part_ring[p + 1]; r++) {
        st_fp_ring_measure(ck, g, r, &a, &len);
        /* Orientation is not a validity rule (REFERENCES.md 3.1), so take
        ** each ring's size and let holes subtract (section 2, row 12b). */
        total += r == g->part_ring[p] ? fabs(a) : -fabs(a);
    }
    return total;
}

static int is_polygonal(const st_geom *g)
{
    return g->type == ST_GEOM_POLYGON || g->type == ST_GEOM_MULTIPOLYGON ||
           g->type == ST_GEOM_COLLECTION;
}

void st_footprint_measure(const st_footprint_checker *ck, const st_geom *g,
                          double *area_m2, double *perimeter_m)
{
    double area = 0.0, perimeter = 0.0;
    /* One pass, each ring measured once: the shell gives the outline (its
    ** length, as pyproj's geometry_area_perimeter reports it: holes add no
    ** perimeter) and its area; holes subtract theirs. */
    for (uint32_t p = 0; is_polygonal(g) && p < g->nparts; p++) {
        double part = 0.0;   /* summed as st_fp_part_area sums it */
        for (uint32_t r = g->part_ring[p]; r < g->part_ring[p + 1]; r++) {
            double a, len;
            st_fp_ring_measure(ck, g, r, &a, &len);
            /* Orientation is not a validity rule (REFERENCES.md 3.1), so take
            ** each ring's size and let holes subtract (section 2, row 12b). */
            part += r == g->part_ring[p] ? fabs(a) : -fabs(a);
            if (r == g->part_ring[p])
                perimeter += len;
        }
        area += part;
    }
    *area_m2 = area;
    *perimeter_m = perimeter;
}

double st_footprint_compactness(double area_m2, double perimeter_m)
{
    if (!(perimeter_m > 0.0))
        return NAN;
    return 4.0 * M_PI * area_m2 / (perimeter_m * perimeter_m);
}

int st_footprint_center(const st_geom *g, double xy[2])
{
    double x0 = INFINITY, y0 = INFINITY, x1 = -INFINITY, y1 = -INFINITY;
    for (uint32_t i = 0; i < g->ncoords; i++) {
        double x = g->xy[2 * i], y = g->xy[2 * i + 1];
        if (!isfinite(x) || !isfinite(y))
            continue;
        x0 = fmin(x0, x);
        x1 = fmax(x1, x);
        y0 = fmin(y0, y);
        y1 = fmax(y1, y);
    }
    if (x0 > x1)
        return 0;
    xy[0] = (x0 + x1) / 2.0;
    xy[1] = (y0 + y1) / 2.0;
    return 1;
}

static int cmp_double(const void *a, const void *b)
{
    double x = *(const double *)a, y = *(const double *)b;
    return (x > y) - (x < y);
}

/* Quantile q of sorted v[0..n) with linear interpolation between ranks. */
static double quantile(const double *v, size_t n, double q)
{
    double pos = q * (double)(n - 1);
    size_t i = (size_t)pos;
    double frac = pos - (double)i;
    return i + 1 < n ? v[i] + frac * (v[i + 1] - v[i]) : v[n - 1];
}

/* Tukey's fences of sorted v, widened to at least the pad on each side. */
static void fences(const double *v, size_t n, double *lo, double *hi)
{
    double q1 = quantile(v, n, 0.25), q3 = quantile(v, n, 0.75);
    double reach = fmax(1.5 * (q3 - q1), ST_FOOTPRINT_EXTENT_PAD);
    *lo = q1 - reach;
    *hi = q3 + reach;
}

st_status st_footprint_extent_compute(const double *xy, size_t n, st_footprint_extent *out)
{
    *out = (st_footprint_extent){0, 0, 0, 0, 0};
    if (n < ST_FOOTPRINT_EXTENT_MIN_POINTS)
        return ST_OK;
    double *xs = st_malloc(n * sizeof *xs), *ys = st_malloc(n * sizeof *ys);
    if (!xs || !ys) {
        st_free(xs);
        st_free(ys);
        return ST_ERR_NOMEM;
    }
    size_t m = 0;
    for (size_t i = 0; i < n; i++)
        if (isfinite(xy[2 * i]) && isfinite(xy[2 * i + 1])) {
            xs[m] = xy[2 * i];
            ys[m++] = xy[2 * i + 1];
        }
    if (m >= ST_FOOTPRINT_EXTENT_MIN_POINTS) {
        qsort(xs, m, sizeof *xs, cmp_double);
        qsort(ys, m, sizeof *ys, cmp_double);
        fences(xs, m, &out->xmin, &out->xmax);
        fences(ys, m, &out->ymin, &out->ymax);
        out->valid = 1;
    }
    st_free(xs);
    st_free(ys);
    return ST_OK;
}
