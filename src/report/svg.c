/*
** report/svg.c -- the inline SVG parts of report.html: the district map and
** four charts (findings by code, field completeness by provenance,
** footprint areas, storeys).
**
** Map projection: spherical Lambert azimuthal equal-area centred on the
** middle of the districts' extent. Equal-area because a choropleth asks the
** eye to compare shaded areas; azimuthal and centred because shapes then
** stay true near the centre at any extent from a town to a country (a plain
** lon/lat plot stretches east-west by 1/cos(latitude)). The sphere instead of
** the ellipsoid changes nothing visible at screen resolution. Rings are
** simplified in screen space (Douglas-Peucker, ST_REP_MAP_TOL pixels), so a
** detailed district layer does not bloat the page.
**
** Input:  the audit's districts (borrowed polygons, lon/lat), the run's
**         findings, the distributions.
** Output: SVG elements appended to the sink; every district with a polygon
**         is exactly one <path class="district"> with a <title>.
** Errors: through the sink (ST_ERR_NOMEM, ST_ERR_LIMIT).
** Limits: labels only while there are at most ST_REP_MAP_MAX_LABELS
**         districts; the findings chart shows ST_REPORT_HTML_MAX_CODES codes.
*/
#include <math.h>
#include <stdio.h>
#include <string.h>

#include "reportInt.h"

#define MAP_W 900.0
#define MAP_H_MAX 620.0
#define MAP_PAD 10.0
#define ST_REP_MAP_TOL 0.35
#define ST_REP_MAP_MAX_LABELS 60
#define EARTH_R 6371008.8   /* mean radius, m (IUGG) */
#define DEG (M_PI / 180.0)

/* ---- projection and simplification ----------------------------------------- */

void st_rep_laea(double lon0, double lat0, double lon, double lat, double *x, double *y)
{
    double p0 = lat0 * DEG, p = lat * DEG, dl = (lon - lon0) * DEG;
    double c = 1 + sin(p0) * sin(p) + cos(p0) * cos(p) * cos(dl);
    double k = c > 1e-12 ? sqrt(2 / c) : 0;   /* the antipode has no image */
    *x = k * cos(p) * sin(dl);
    *y = k * (cos(p0) * sin(p) - sin(p0) * cos(p) * cos(dl));
}

static double seg_dist2(const double *xy, size_t a, size_t b, size_t i)
{
    double ax = xy[2 * a], ay = xy[2 * a + 1], bx = xy[2 * b], by = xy[2 * b + 1];
    double px = xy[2 * i], py = xy[2 * i + 1];
    double dx = bx - ax, dy = by - ay, l2 = dx * dx + dy * dy;
    double t = l2 > 0 ? ((px - ax) * dx + (py - ay) * dy) / l2 : 0;
    t = t < 0 ? 0 : t > 1 ? 1 : t;
    double qx = ax + t * dx - px, qy = ay + t * dy - py;
    return qx * qx + qy * qy;
}

/* Farthest point strictly between a and b, or a when none. */
static size_t farthest(const double *xy, size_t a, size_t b, double *d2)
{
    size_t best = a;
    *d2 = -1;
    for (size_t i = a + 1; i < b; i++) {
        double d = seg_dist2(xy, a, b, i);
        if (d > *d2) {
            *d2 = d;
            best = i;
        }
    }
    return best;
}

/* Douglas-Peucker on [a, b] with an explicit stack (2 entries a level);
** 'force' keeps the farthest point of the first split even when within
** the tolerance, so no ring collapses. */
static void dp(const double *xy, size_t a, size_t b, double tol2, unsigned char *keep,
               size_t *stack, int force)
{
    size_t top = 0;
    stack[top++] = a;
    stack[top++] = b;
    while (top) {
        size_t hi = stack[--top], lo = stack[--top];
        double d2;
        size_t m = farthest(xy, lo, hi, &d2);
        if (m == lo || (d2 <= tol2 && !force))
            continue;
        force = 0;
        keep[m] = 1;
        stack[top++] = lo;
        stack[top++] = m;
        stack[top++] = m;
        stack[top++] = hi;
    }
}

size_t st_rep_simplify_ring(const double *xy, size_t n, double tol, unsigned char *keep,
                            size_t *stack)
{
    memset(keep, 0, n);
    keep[0] = keep[n - 1] = 1;
    /* split the closed ring at the point farthest from its first point */
    size_t far = 0;
    double best = -1;
    for (size_t i = 1; i + 1 < n; i++) {
        double dx = xy[2 * i] - xy[0], dy = xy[2 * i + 1] - xy[1];
        if (dx * dx + dy * dy > best) {
            best = dx * dx + dy * dy;
            far = i;
        }
    }
    if (far) {
        keep[far] = 1;
        dp(xy, 0, far, tol * tol, keep, stack, 1);
        dp(xy, far, n - 1, tol * tol, keep, stack, 1);
    }
    size_t k = 0;
    for (size_t i = 0; i < n; i++)
        k += keep[i];
    return k;
}

/* ---- the map ------------------------------------------------------------------ */

typedef struct mapframe {
    double lon0, lat0;          /* projection centre */
    double minx, maxy, scale;   /* projected -> screen */
    double w, h;
} mapframe;

static void to_screen(const mapframe *m, double lon, double lat, double *sx, double *sy)
{
    double x, y;
    st_rep_laea(m->lon0, m->lat0, lon, lat, &x, &y);
    *sx = MAP_PAD + (x - m->minx) * m->scale;
    *sy = MAP_PAD + (m->maxy - y) * m->scale;
}

static int frame_map(const st_audit *a, mapframe *m)
{
    double bb[4] = {INFINITY, INFINITY, -INFINITY, -INFINITY};
    for (size_t i = 0; i < a->ndistricts; i++) {
        double b[4];
        const st_geom *g = a->districts[i].geom;
        if (!g || !st_geom_bbox(g, b))
            continue;
        bb[0] = fmin(bb[0], b[0]), bb[1] = fmin(bb[1], b[1]);
        bb[2] = fmax(bb[2], b[2]), bb[3] = fmax(bb[3], b[3]);
    }
    if (!(bb[0] <= bb[2]))
        return 0;
    m->lon0 = (bb[0] + bb[2]) / 2;
    m->lat0 = (bb[1] + bb[3]) / 2;
    double minx = INFINITY, miny = INFINITY, maxx = -INFINITY, maxy = -INFINITY;
    for (size_t i = 0; i < a->ndistricts; i++) {
        const st_geom *g = a->districts[i].geom;
        for (uint32_t k = 0; g && k < g->ncoords; k++) {
            double x, y;
            st_rep_laea(m->lon0, m->lat0, g->xy[2 * k], g->xy[2 * k + 1], &x, &y);
            minx = fmin(minx, x), maxx = fmax(maxx, x);
            miny = fmin(miny, y), maxy = fmax(maxy, y);
        }
    }
    double pw = maxx - minx, ph = maxy - miny;
    if (!(pw > 0) || !(ph > 0))
        return 0;
    double avail = MAP_W - 2 * MAP_PAD, availh = MAP_H_MAX - 2 * MAP_PAD;
    m->scale = fmin(avail / pw, availh / ph);
    m->minx = minx;
    m->maxy = maxy;
    m->w = pw * m->scale + 2 * MAP_PAD;
    m->h = ph * m->scale + 2 * MAP_PAD;
    return 1;
}

/* Screen coordinates of ring r of g into xy (allocated by the caller). */
static void project_ring(const mapframe *m, const st_geom *g, uint32_t r, double *xy)
{
    uint32_t a = g->ring_coord[r], b = g->ring_coord[r + 1];
    for (uint32_t k = a; k < b; k++)
        to_screen(m, g->xy[2 * k], g->xy[2 * k + 1], &xy[2 * (k - a)], &xy[2 * (k - a) + 1]);
}

static uint32_t longest_ring(const st_geom *g)
{
    uint32_t n = 0;
    for (uint32_t r = 0; r < g->nrings; r++)
        if (g->ring_coord[r + 1] - g->ring_coord[r] > n)
            n = g->ring_coord[r + 1] - g->ring_coord[r];
    return n;
}

static void path_data(st_rout *o, const mapframe *m, const st_geom *g, double *xy,
                      unsigned char *keep, size_t *stack)
{
    for (uint32_t r = 0; r < g->nrings; r++) {
        size_t n = g->ring_coord[r + 1] - g->ring_coord[r];
        if (n < 4)
            continue;
        project_ring(m, g, r, xy);
        st_rep_simplify_ring(xy, n, ST_REP_MAP_TOL, keep, stack);
        char c = 'M';
        for (size_t i = 0; i + 1 < n; i++) {
            if (!keep[i])
                continue;
            st_rout_printf(o, "%c%.1f %.1f", c, xy[2 * i], xy[2 * i + 1]);
            c = 'L';
        }
        st_rout_puts(o, "Z");
    }
}

/* A point inside the district's largest ring, for its label: the middle
** of the widest inside span on a few horizontal scan lines. */
static int label_point(const mapframe *m, const st_geom *g, double *xy, double *lx, double *ly,
                       double *span)
{
    uint32_t best_r = UINT32_MAX;
    double best_a = 0;
    for (uint32_t p = 0; p < g->nparts; p++) {
        uint32_t r = g->part_ring[p];   /* the shell */
        double a = fabs(st_geom_ring_signed_area(g, r));
        if (a > best_a) {
            best_a = a;
            best_r = r;
        }
    }
    if (best_r == UINT32_MAX)
        return 0;
    size_t n = g->ring_coord[best_r + 1] - g->ring_coord[best_r];
    project_ring(m, g, best_r, xy);
    double y0 = INFINITY, y1 = -INFINITY;
    for (size_t i = 0; i < n; i++)
        y0 = fmin(y0, xy[2 * i + 1]), y1 = fmax(y1, xy[2 * i + 1]);
    *span = 0;
    /* from the middle outwards: a wider span further out must win clearly */
    static const int order[9] = {5, 4, 6, 3, 7, 2, 8, 1, 9};
    for (int s = 0; s < 9; s++) {
        double y = y0 + (y1 - y0) * order[s] / 10.0;
        /* crossings of the scan line, kept sorted by insertion (few) */
        double xs[64];
        int nx = 0;
        for (size_t i = 0; i + 1 < n && nx < 64; i++) {
            double ay = xy[2 * i + 1], by = xy[2 * i + 3];
            if ((ay <= y) == (by <= y))
                continue;
            double x = xy[2 * i] + (y - ay) / (by - ay) * (xy[2 * i + 2] - xy[2 * i]);
            int k = nx++;
            while (k > 0 && xs[k - 1] > x) {
                xs[k] = xs[k - 1];
                k--;
            }
            xs[k] = x;
        }
        for (int k = 0; k + 1 < nx; k += 2)
            if (xs[k + 1] - xs[k] > *span * 1.15) {
                *span = xs[k + 1] - xs[k];
                *lx = (xs[k] + xs[k + 1]) / 2;
                *ly = y;
            }
    }
    return *span > 0;
}

static void district_title(st_rout *o, const st_audit *a, const st_audit_district *d)
{
    st_rout_puts(o, "<title>");
    st_rout_esc(o, d->key);
    if (d->region) {
        st_rout_puts(o, " (region ");
        st_rout_esc(o, d->region);
        st_rout_puts(o, ")");
    }
    st_rout_puts(o, "\nbuildings kept: ");
    st_rout_count(o, d->buildings);
    if (d->expected >= 0) {
        st_rout_puts(o, "\nreference: ");
        st_rout_count(o, (uint64_t)d->expected);
        st_rout_puts(o, ", completeness ratio ");
        st_rout_pct(o, d->ratio, 0);
        st_rout_printf(o, " (%s)", st_rep_ref_words(d->ref));
    } else
        st_rout_puts(o, "\nno reference count");
    if (a->nfields) {
        st_rout_puts(o, "\nassumed values: ");
        st_rout_pct(o, st_rep_assumed_share(a, d), 0);
        st_rout_puts(o, ", observed: ");
        st_rout_pct(o, st_rep_prov_share(a, d, ST_PROV_DERIVED, ST_PROV_SOURCE), 0);
    }
    st_rout_printf(o, "\nfindings: %llu error, %llu warning",
                   (unsigned long long)d->findings[ST_SEV_ERROR],
                   (unsigned long long)d->findings[ST_SEV_WARNING]);
    st_rout_printf(o, "\nfootprint area: %.0f m\xC2\xB2", d->footprint_m2);
    st_rout_puts(o, "</title>");
}

/* A round scale-bar length near a fifth of the map width. */
static double scalebar_metres(const mapframe *m)
{
    double target = (m->w / 5) / m->scale * EARTH_R;
    double p = pow(10, floor(log10(target)));
    double steps[] = {5, 2, 1};
    for (int i = 0; i < 3; i++)
        if (steps[i] * p <= target)
            return steps[i] * p;
    return p;
}

static void scalebar(st_rout *o, const mapframe *m)
{
    double metres = scalebar_metres(m);
    double px = metres / EARTH_R * m->scale;
    double x = MAP_PAD + 4, y = m->h - MAP_PAD - 4;
    st_rout_printf(o, "<g class=\"scalebar\"><path d=\"M%.1f %.1fv-5h%.1fv5\"/>", x, y - 1, px);
    if (metres >= 1000)
        st_rout_printf(o, "<text x=\"%.1f\" y=\"%.1f\">%g km</text></g>", x + px + 4, y, metres / 1000);
    else
        st_rout_printf(o, "<text x=\"%.1f\" y=\"%.1f\">%g m</text></g>", x + px + 4, y, metres);
}

static void hatch_defs(st_rout *o)
{
    st_rout_puts(o, "<defs><pattern id=\"nohatch\" patternUnits=\"userSpaceOnUse\" width=\"7\" "
                    "height=\"7\" patternTransform=\"rotate(45)\"><rect width=\"7\" height=\"7\" "
                    "fill=\"#f4f4f4\"/><line x1=\"0\" y1=\"0\" x2=\"0\" y2=\"7\" stroke=\"#9a9a9a\" "
                    "stroke-width=\"2.2\"/></pattern></defs>");
}

static void districts_layer(st_rout *o, const st_audit *a, const mapframe *m)
{
    uint32_t maxn = 4;
    for (size_t i = 0; i < a->ndistricts; i++)
        if (a->districts[i].geom && longest_ring(a->districts[i].geom) > maxn)
            maxn = longest_ring(a->districts[i].geom);
    double *xy = st_malloc(2 * (size_t)maxn * sizeof *xy);
    unsigned char *keep = st_malloc(maxn);
    size_t *stack = st_malloc(4 * (size_t)maxn * sizeof *stack);
    if (!xy || !keep || !stack) {
        if (o->rc == ST_OK)
            o->rc = ST_ERR_NOMEM;
        goto done;
    }
    st_rout_puts(o, "<g class=\"districts\">");
    for (size_t i = 0; i < a->ndistricts; i++) {
        const st_audit_district *d = &a->districts[i];
        if (!d->geom || st_geom_is_empty(d->geom))
            continue;
        double assumed = st_rep_assumed_share(a, d);
        st_rout_puts(o, "<path class=\"district ");
        if (isnan(d->ratio))
            st_rout_puts(o, "rn");
        else
            st_rout_printf(o, "r%d", st_rep_class(d->ratio, st_rep_ratio_breaks));
        if (isnan(assumed))
            st_rout_puts(o, " an");
        else
            st_rout_printf(o, " a%d", st_rep_class(assumed, st_rep_assumed_breaks));
        if (d->ref == ST_REF_OVER)
            st_rout_puts(o, " over");
        st_rout_puts(o, "\" data-key=\"");
        st_rout_esc(o, d->key);
        st_rout_puts(o, "\" d=\"");
        path_data(o, m, d->geom, xy, keep, stack);
        st_rout_puts(o, "\">");
        district_title(o, a, d);
        st_rout_puts(o, "</path>");
    }
    st_rout_puts(o, "</g>");
    if (st_rep_mapped_districts(a) <= ST_REP_MAP_MAX_LABELS) {
        st_rout_puts(o, "<g class=\"labels\" aria-hidden=\"true\">");
        for (size_t i = 0; i < a->ndistricts; i++) {
            const st_audit_district *d = &a->districts[i];
            double lx = 0, ly = 0, span = 0;
            if (!d->geom || !label_point(m, d->geom, xy, &lx, &ly, &span))
                continue;
            if (span < 7.0 * (double)strlen(d->key) + 12)
                continue;   /* would spill over its neighbours */
            /* on a light chip: the key, and under it the figure the map is
            ** shaded by */
            double w = 6.8 * (double)(strlen(d->key) > 4 ? strlen(d->key) : 4) + 10;
            st_rout_printf(o, "<rect x=\"%.1f\" y=\"%.1f\" width=\"%.1f\" height=\"29\" "
                              "rx=\"4\"/>", lx - w / 2, ly - 13, w);
            st_rout_printf(o, "<text x=\"%.1f\" y=\"%.1f\">", lx, ly - 1);
            st_rout_esc(o, d->key);
            st_rout_printf(o, "</text><text class=\"v lr\" x=\"%.1f\" y=\"%.1f\">", lx, ly + 12);
            st_rout_pct(o, d->ratio, 0);
            st_rout_printf(o, "</text><text class=\"v la\" x=\"%.1f\" y=\"%.1f\">", lx, ly + 12);
            st_rout_pct(o, st_rep_assumed_share(a, d), 0);
            st_rout_puts(o, "</text>");
        }
        st_rout_puts(o, "</g>");
    }
done:
    st_free(xy);
    st_free(keep);
    st_free(stack);
}

static void legend(st_rout *o, const char *cls, const char *title, const char *const *colours,
                   const double *breaks, const char *none_label, const char *extra)
{
    st_rout_printf(o, "<div class=\"legend %s\"><p class=\"legend-title\">", cls);
    st_rout_esc(o, title);
    st_rout_puts(o, "</p><svg width=\"900\" height=\"34\" viewBox=\"0 0 900 34\" role=\"img\" "
                    "aria-label=\"legend\">");
    double x = 0;
    for (int c = 0; c < ST_REP_CLASSES; c++) {
        char label[48];
        if (c == 0)
            snprintf(label, sizeof label, "under %g%%", 100 * breaks[0]);
        else if (c == ST_REP_CLASSES - 1)
            snprintf(label, sizeof label, "%g%% or more", 100 * breaks[c - 1]);
        else
            snprintf(label, sizeof label, "%g\xE2\x80\x93%g%%", 100 * breaks[c - 1], 100 * breaks[c]);
        st_rout_printf(o, "<rect x=\"%.0f\" y=\"4\" width=\"22\" height=\"14\" fill=\"%s\" "
                          "stroke=\"#555\" stroke-width=\"0.6\"/><text x=\"%.0f\" y=\"16\">%s</text>",
                       x, colours[c], x + 27, label);
        x += 27 + 7.0 * (double)strlen(label) + 14;
    }
    st_rout_printf(o, "<rect x=\"%.0f\" y=\"4\" width=\"22\" height=\"14\" fill=\"url(#nohatch)\" "
                      "stroke=\"#555\" stroke-width=\"0.6\"/><text x=\"%.0f\" y=\"16\">",
                   x, x + 27);
    st_rout_esc(o, none_label);
    st_rout_puts(o, "</text></svg>");
    if (extra)
        st_rout_printf(o, "<p class=\"legend-note\">%s</p>", extra);
    st_rout_puts(o, "</div>");
}

void st_rep_svg_map(st_rout *o, const st_audit *a)
{
    mapframe m;
    if (!a || !frame_map(a, &m)) {
        st_rout_puts(o, "<p class=\"empty\">No district layer was given (<code>--districts</code>), "
                        "so there is no map.</p>");
        return;
    }
    int any_ratio = 0;
    for (size_t i = 0; i < a->ndistricts; i++)
        any_ratio |= !isnan(a->districts[i].ratio);
    int assumed_first = !any_ratio && a->nfields > 0;
    st_rout_printf(o, "<div class=\"mapbox\">"
                      "<input type=\"radio\" name=\"mapmode\" id=\"mm-r\"%s>"
                      "<label for=\"mm-r\">Completeness ratio (buildings kept / reference)</label>"
                      "<input type=\"radio\" name=\"mapmode\" id=\"mm-a\"%s>"
                      "<label for=\"mm-a\">Share of assumed values (defaults)</label>",
                   assumed_first ? "" : " checked", assumed_first ? " checked" : "");
    st_rout_printf(o, "<div class=\"mapframe\"><svg id=\"districtmap\" class=\"map\" "
                      "width=\"%.0f\" height=\"%.0f\" viewBox=\"0 0 %.0f %.0f\" role=\"img\" "
                      "aria-label=\"Map of %zu districts\">",
                   m.w, m.h, m.w, m.h, st_rep_mapped_districts(a));
    hatch_defs(o);
    districts_layer(o, a, &m);
    scalebar(o, &m);
    st_rout_puts(o, "</svg></div>");
    char note[200];
    snprintf(note, sizeof note,
             "Dashed outline: over-mapped (more buildings than the reference, ratio above %g%%). "
             "Under-mapped below %g%%.",
             100 * a->over_ratio, 100 * a->under_ratio);
    legend(o, "legend-r", "Completeness ratio: buildings kept divided by the reference count",
           st_rep_ratio_colours, st_rep_ratio_breaks, "no reference count", note);
    legend(o, "legend-a", "Share of schema values filled from defaults (default or drawn)",
           st_rep_assumed_colours, st_rep_assumed_breaks, "no buildings or no schema", NULL);
    st_rout_puts(o, "</div>");
}

/* ---- charts ------------------------------------------------------------------- */

/* A 1-2-5 step giving at most about five ticks up to 'max'. */
static double nice_step(double max)
{
    if (max <= 5)
        return 1;
    double raw = max / 5, p = pow(10, floor(log10(raw)));
    return raw <= p ? p : raw <= 2 * p ? 2 * p : raw <= 5 * p ? 5 * p : 10 * p;
}

static void count_text(char *t, size_t n, double v)
{
    if (v >= 1e6)
        snprintf(t, n, "%gM", v / 1e6);
    else if (v >= 1e4)
        snprintf(t, n, "%gk", v / 1e3);
    else
        snprintf(t, n, "%g", v);
}

void st_rep_svg_findings(st_rout *o, const st_run_result *r)
{
    size_t n = r->ncodes < ST_REPORT_HTML_MAX_CODES ? r->ncodes : ST_REPORT_HTML_MAX_CODES;
    if (!n) {
        st_rout_puts(o, "<p class=\"empty\">No findings.</p>");
        return;
    }
    const double label_w = 300, bar_w = 520, row = 22, top = 26;
    uint64_t max = 1;
    for (size_t c = 0; c < n; c++)
        if (r->codes[c].count > max)
            max = r->codes[c].count;
    double h = top + row * (double)n + 6;
    st_rout_printf(o, "<svg class=\"chart\" width=\"900\" height=\"%.0f\" viewBox=\"0 0 900 %.0f\" "
                      "role=\"img\" aria-label=\"Findings by code\">", h, h);
    static const st_severity order[3] = {ST_SEV_ERROR, ST_SEV_WARNING, ST_SEV_NOTE};
    for (int k = 0; k < 3; k++)
        st_rout_printf(o, "<rect x=\"%d\" y=\"4\" width=\"14\" height=\"12\" fill=\"%s\"/>"
                          "<text x=\"%d\" y=\"15\">%s</text>",
                       (int)label_w + 110 * k, st_rep_sev_colours[order[k]],
                       (int)label_w + 110 * k + 19, st_severity_name(order[k]));
    for (size_t c = 0; c < n; c++) {
        const st_run_code_count *cc = &r->codes[c];
        double y = top + row * (double)c;
        double w = bar_w * (double)cc->count / (double)max;
        if (w < 1)
            w = 1;
        st_rout_puts(o, "<g><title>");
        st_rout_esc(o, cc->code);
        st_rout_printf(o, " (%s): %llu</title>", st_severity_name(cc->severity),
                       (unsigned long long)cc->count);
        st_rout_printf(o, "<text class=\"code\" x=\"%.0f\" y=\"%.1f\">", label_w - 8, y + 15);
        st_rout_esc(o, cc->code);
        st_rout_printf(o, "</text><rect x=\"%.0f\" y=\"%.1f\" width=\"%.1f\" height=\"16\" "
                          "fill=\"%s\"/><text x=\"%.1f\" y=\"%.1f\">",
                       label_w, y + 3, w, st_rep_sev_colours[cc->severity], label_w + w + 6, y + 15);
        st_rout_count(o, cc->count);
        st_rout_puts(o, "</text></g>");
    }
    st_rout_puts(o, "</svg>");
    if (r->ncodes > n)
        st_rout_printf(o, "<p class=\"note\">%zu more codes are listed in report.json.</p>",
                       r->ncodes - n);
}

/* provenance in the order drawn, observed first */
static const st_provenance prov_order[ST_NPROV] = {ST_PROV_SOURCE, ST_PROV_DERIVED,
                                                   ST_PROV_DEFAULT, ST_PROV_DRAWN,
                                                   ST_PROV_UNKNOWN};

static void prov_legend(st_rout *o, double y)
{
    static const char *const words[ST_NPROV] = {"source (observed)", "derived (observed)",
                                                "default (assumed)", "drawn (assumed)", "unknown"};
    double x = 0;
    for (int k = 0; k < ST_NPROV; k++) {
        st_rout_printf(o, "<rect x=\"%.0f\" y=\"%.0f\" width=\"14\" height=\"12\" fill=\"%s\" "
                          "stroke=\"#777\" stroke-width=\"0.5\"/><text x=\"%.0f\" y=\"%.0f\">%s</text>",
                       x, y, st_rep_prov_colours[prov_order[k]], x + 19, y + 11, words[k]);
        x += 19 + 7.2 * (double)strlen(words[k]) + 16;
    }
}

void st_rep_svg_provenance(st_rout *o, const st_audit *a)
{
    if (!a || !a->nfields || !a->total.fields) {
        st_rout_puts(o, "<p class=\"empty\">No schema fields: the run had no rules.</p>");
        return;
    }
    const double label_w = 130, bar_w = 700, row = 26, top = 28;
    double h = top + row * a->nfields + 4;
    st_rout_printf(o, "<svg class=\"chart\" width=\"900\" height=\"%.0f\" viewBox=\"0 0 900 %.0f\" "
                      "role=\"img\" aria-label=\"Field completeness by provenance\">", h, h);
    prov_legend(o, 4);
    for (uint32_t i = 0; i < a->nfields; i++) {
        const st_audit_field *f = &a->total.fields[i];
        uint64_t t = st_rep_field_total(f);
        double y = top + row * i;
        st_rout_printf(o, "<text class=\"code\" x=\"%.0f\" y=\"%.1f\">", label_w - 8, y + 15);
        st_rout_esc(o, a->fields[i]);
        st_rout_puts(o, "</text>");
        double x = label_w;
        for (int k = 0; t && k < ST_NPROV; k++) {
            st_provenance p = prov_order[k];
            double share = (double)f->by_prov[p] / (double)t;
            double w = bar_w * share;
            if (f->by_prov[p] == 0)
                continue;
            st_rout_puts(o, "<g><title>");
            st_rout_esc(o, a->fields[i]);
            st_rout_printf(o, ", %s: %llu of %llu (%.1f%%)</title>", st_provenance_name(p),
                           (unsigned long long)f->by_prov[p], (unsigned long long)t, 100 * share);
            st_rout_printf(o, "<rect x=\"%.1f\" y=\"%.1f\" width=\"%.1f\" height=\"18\" fill=\"%s\"/>",
                           x, y + 2, w, st_rep_prov_colours[p]);
            if (w >= 38) {
                int dark = p == ST_PROV_SOURCE || p == ST_PROV_DEFAULT;
                st_rout_printf(o, "<text class=\"in%s\" x=\"%.1f\" y=\"%.1f\">%.0f%%</text>",
                               dark ? " light" : "", x + w / 2, y + 15, 100 * share);
            }
            st_rout_puts(o, "</g>");
            x += w;
        }
        st_rout_printf(o, "<rect x=\"%.0f\" y=\"%.1f\" width=\"%.0f\" height=\"18\" fill=\"none\" "
                          "stroke=\"#666\" stroke-width=\"0.6\"/>", label_w, y + 2, bar_w);
    }
    st_rout_puts(o, "</svg>");
}

/* Vertical bar chart frame: y axis with gridlines up to 'max'. Returns the
** y scale (pixels per count). */
static double axes(st_rout *o, double x0, double y0, double plot_w, double plot_h, double max,
                   const char *ylabel)
{
    double step = nice_step(max);
    double top = ceil(max / step) * step;
    if (top <= 0)
        top = 1;
    double k = plot_h / top;
    for (double v = 0; v <= top + step / 2; v += step) {
        double y = y0 - v * k;
        char t[32];
        count_text(t, sizeof t, v);
        st_rout_printf(o, "<line class=\"grid\" x1=\"%.0f\" y1=\"%.1f\" x2=\"%.0f\" y2=\"%.1f\"/>"
                          "<text class=\"tick\" x=\"%.0f\" y=\"%.1f\">%s</text>",
                       x0, y, x0 + plot_w, y, x0 - 6, y + 4, t);
    }
    st_rout_printf(o, "<text class=\"axis\" x=\"12\" y=\"%.0f\" transform=\"rotate(-90 12 %.0f)\">%s</text>",
                   y0 - plot_h / 2, y0 - plot_h / 2, ylabel);
    return k;
}

static void area_label(char *t, size_t n, int i)
{
    double lo, hi;
    st_report_area_bin(i, &lo, &hi);
    if (i == 0)
        snprintf(t, n, "&lt;%g", hi);
    else if (isinf(hi))
        snprintf(t, n, "\xE2\x89\xA5%gk", lo / 1000);
    else if (lo >= 1000)
        snprintf(t, n, "%gk\xE2\x80\x93%gk", lo / 1000, hi / 1000);
    else
        snprintf(t, n, "%g\xE2\x80\x93%g", lo, hi);
}

void st_rep_svg_area(st_rout *o, const st_report_dist *d)
{
    if (!d || !d->buildings) {
        st_rout_puts(o, "<p class=\"empty\">No buildings kept.</p>");
        return;
    }
    const double x0 = 62, y0 = 214, plot_w = 820, plot_h = 190;
    uint64_t max = 0;
    for (int i = 0; i < ST_REPORT_AREA_BINS; i++)
        max = d->area[i] > max ? d->area[i] : max;
    st_rout_puts(o, "<svg class=\"chart\" width=\"900\" height=\"256\" viewBox=\"0 0 900 256\" "
                    "role=\"img\" aria-label=\"Footprint areas\">");
    double k = axes(o, x0, y0, plot_w, plot_h, (double)max, "buildings");
    double bw = plot_w / ST_REPORT_AREA_BINS;
    for (int i = 0; i < ST_REPORT_AREA_BINS; i++) {
        char t[48];
        area_label(t, sizeof t, i);
        double h = (double)d->area[i] * k, x = x0 + bw * i;
        st_rout_printf(o, "<g><title>%s m\xC2\xB2: %llu buildings</title>"
                          "<rect class=\"bar\" x=\"%.1f\" y=\"%.1f\" width=\"%.1f\" height=\"%.1f\"/>"
                          "<text class=\"xl\" x=\"%.1f\" y=\"%.0f\">%s</text></g>",
                       t, (unsigned long long)d->area[i], x + 3, y0 - h, bw - 6, h, x + bw / 2,
                       y0 + 16, t);
    }
    st_rout_printf(o, "<text class=\"axis\" x=\"%.0f\" y=\"250\">footprint area, m\xC2\xB2 "
                      "(1-2-5 logarithmic bins)</text></svg>", x0 + plot_w / 2);
}

void st_rep_svg_storeys(st_rout *o, const st_report_dist *d)
{
    if (!d || !d->has_storeys) {
        st_rout_puts(o, "<p class=\"empty\">The schema has no storeys field.</p>");
        return;
    }
    const double x0 = 62, y0 = 232, plot_w = 820, plot_h = 190;
    const int nb = ST_REPORT_STOREY_BINS + 1;   /* and "unknown" */
    uint64_t max = d->storeys_unknown;
    for (int i = 0; i < ST_REPORT_STOREY_BINS; i++) {
        uint64_t s = d->storeys_observed[i] + d->storeys_assumed[i];
        max = s > max ? s : max;
    }
    st_rout_puts(o, "<svg class=\"chart\" width=\"900\" height=\"276\" viewBox=\"0 0 900 276\" "
                    "role=\"img\" aria-label=\"Storeys\">");
    static const char *const words[3] = {"observed (source, derived)", "assumed (default, drawn)", "unknown"};
    const char *colours[3] = {st_rep_prov_colours[ST_PROV_SOURCE],
                              st_rep_prov_colours[ST_PROV_DEFAULT], "url(#nohatch-s)"};
    st_rout_puts(o, "<defs><pattern id=\"nohatch-s\" patternUnits=\"userSpaceOnUse\" width=\"7\" "
                    "height=\"7\" patternTransform=\"rotate(45)\"><rect width=\"7\" height=\"7\" "
                    "fill=\"#f4f4f4\"/><line x1=\"0\" y1=\"0\" x2=\"0\" y2=\"7\" stroke=\"#9a9a9a\" "
                    "stroke-width=\"2.2\"/></pattern></defs>");
    for (int c = 0; c < 3; c++)
        st_rout_printf(o, "<rect x=\"%d\" y=\"2\" width=\"14\" height=\"12\" fill=\"%s\" "
                          "stroke=\"#777\" stroke-width=\"0.5\"/><text x=\"%d\" y=\"13\">%s</text>",
                       (int)x0 + 230 * c, colours[c], (int)x0 + 230 * c + 19, words[c]);
    double k = axes(o, x0, y0, plot_w, plot_h, (double)max, "buildings");
    double bw = plot_w / nb;
    for (int i = 0; i < nb; i++) {
        char t[32];
        uint64_t obs = 0, ass = 0, unk = 0;
        if (i < ST_REPORT_STOREY_BINS) {
            int lo, hi;
            st_report_storey_bin(i, &lo, &hi);
            if (hi < 0)
                snprintf(t, sizeof t, "%d+", lo);
            else if (hi == lo)
                snprintf(t, sizeof t, "%d", lo);
            else
                snprintf(t, sizeof t, "%d\xE2\x80\x93%d", lo, hi);
            obs = d->storeys_observed[i];
            ass = d->storeys_assumed[i];
        } else {
            snprintf(t, sizeof t, "unknown");
            unk = d->storeys_unknown;
        }
        double x = x0 + bw * i + 3, w = bw - 6;
        double ho = (double)obs * k, ha = (double)ass * k, hu = (double)unk * k;
        if (i < ST_REPORT_STOREY_BINS)
            st_rout_printf(o, "<g><title>%s storeys: %llu observed, %llu assumed</title>", t,
                           (unsigned long long)obs, (unsigned long long)ass);
        else
            st_rout_printf(o, "<g><title>storeys unknown: %llu buildings</title>",
                           (unsigned long long)unk);
        if (i == ST_REPORT_STOREY_BINS)
            st_rout_printf(o, "<rect x=\"%.1f\" y=\"%.1f\" width=\"%.1f\" height=\"%.1f\" "
                              "fill=\"url(#nohatch-s)\" stroke=\"#777\" stroke-width=\"0.5\"/>",
                           x, y0 - hu, w, hu);
        st_rout_printf(o, "<rect x=\"%.1f\" y=\"%.1f\" width=\"%.1f\" height=\"%.1f\" fill=\"%s\"/>"
                          "<rect x=\"%.1f\" y=\"%.1f\" width=\"%.1f\" height=\"%.1f\" fill=\"%s\"/>",
                       x, y0 - ho, w, ho, colours[0], x, y0 - ho - ha, w, ha, colours[1]);
        st_rout_printf(o, "<text class=\"xl\" x=\"%.1f\" y=\"%.0f\">%s</text></g>", x + w / 2,
                       y0 + 16, t);
    }
    st_rout_printf(o, "<text class=\"axis\" x=\"%.0f\" y=\"270\">storeys</text></svg>",
                   x0 + plot_w / 2);
}
