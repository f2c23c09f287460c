/*
** report/report.c -- what the three report writers share: the text sink,
** escaping and number formats, figures derived from the audit, palettes,
** the distributions of kept buildings, file hashes, and writing a rendered
** report under a temporary name that is renamed into place.
**
** Input:  an st_report_input (everything borrowed).
** Output: text appended to an st_buf; files in place only after a rename.
** Errors: ST_ERR_NOMEM, ST_ERR_LIMIT (ST_REPORT_MAX_BYTES), ST_ERR_IO with
**         a diagnostic naming the file.
*/
#include <errno.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>

#include "reportInt.h"
#include "stocktake/sha256.h"

/* ---- the sink ------------------------------------------------------------ */

void st_rout_puts(st_rout *o, const char *s)
{
    if (o->rc == ST_OK)
        o->rc = st_buf_puts(o->b, s);
}

void st_rout_printf(st_rout *o, const char *fmt, ...)
{
    if (o->rc != ST_OK)
        return;
    va_list ap;
    va_start(ap, fmt);
    char small[256];
    int n = vsnprintf(small, sizeof small, fmt, ap);
    va_end(ap);
    if (n < 0) {
        o->rc = ST_ERR_FORMAT;
        return;
    }
    if ((size_t)n < sizeof small) {
        o->rc = st_buf_append(o->b, small, (size_t)n);
        return;
    }
    char *big = st_malloc((size_t)n + 1);
    if (!big) {
        o->rc = ST_ERR_NOMEM;
        return;
    }
    va_start(ap, fmt);
    vsnprintf(big, (size_t)n + 1, fmt, ap);
    va_end(ap);
    o->rc = st_buf_append(o->b, big, (size_t)n);
    st_free(big);
}

void st_rout_esc(st_rout *o, const char *s)
{
    if (!s)
        return;
    const char *run = s;
    for (const char *p = s;; p++) {
        const char *rep = NULL;
        switch (*p) {
        case '&': rep = "&amp;"; break;
        case '<': rep = "&lt;"; break;
        case '>': rep = "&gt;"; break;
        case '"': rep = "&quot;"; break;
        case '\'': rep = "&#39;"; break;
        case '\0': break;
        default: continue;
        }
        if (o->rc == ST_OK && p > run)
            o->rc = st_buf_append(o->b, run, (size_t)(p - run));
        if (!*p)
            return;
        st_rout_puts(o, rep);
        run = p + 1;
    }
}

void st_rout_count(st_rout *o, uint64_t n)
{
    char digits[24];
    int len = snprintf(digits, sizeof digits, "%llu", (unsigned long long)n);
    for (int i = 0; i < len; i++) {
        if (i && (len - i) % 3 == 0)
            st_rout_puts(o, "\xE2\x80\xAF");   /* U+202F narrow no-break space */
        if (o->rc == ST_OK)
            o->rc = st_buf_append(o->b, digits + i, 1);
    }
}

void st_rout_pct(st_rout *o, double share, int dec)
{
    if (isnan(share))
        st_rout_puts(o, "\xE2\x80\x93");   /* en dash */
    else
        st_rout_printf(o, "%.*f%%", dec, 100.0 * share);
}

/* ---- derived figures ------------------------------------------------------ */

uint64_t st_rep_field_total(const st_audit_field *f)
{
    uint64_t t = 0;
    for (int p = 0; p < ST_NPROV; p++)
        t += f->by_prov[p];
    return t;
}

double st_rep_prov_share(const st_audit *a, const st_audit_district *d,
                         st_provenance lo, st_provenance hi)
{
    uint64_t num = 0, den = 0;
    for (uint32_t i = 0; d->fields && i < a->nfields; i++) {
        den += st_rep_field_total(&d->fields[i]);
        for (int p = (int)lo; p <= (int)hi; p++)
            num += d->fields[i].by_prov[p];
    }
    return den ? (double)num / (double)den : NAN;
}

double st_rep_assumed_share(const st_audit *a, const st_audit_district *d)
{
    return st_rep_prov_share(a, d, ST_PROV_DRAWN, ST_PROV_DEFAULT);
}

const char *st_rep_ref_name(st_ref_state s)
{
    switch (s) {
    case ST_REF_OK: return "ok";
    case ST_REF_UNDER: return "under";
    case ST_REF_OVER: return "over";
    case ST_REF_ABSENT: return "absent";
    case ST_REF_NONE: break;
    }
    return "none";
}

const char *st_rep_ref_words(st_ref_state s)
{
    switch (s) {
    case ST_REF_OK: return "within thresholds";
    case ST_REF_UNDER: return "under-mapped";
    case ST_REF_OVER: return "over-mapped";
    case ST_REF_ABSENT: return "not in the district layer";
    case ST_REF_NONE: break;
    }
    return "no reference";
}

size_t st_rep_gates(const st_report_input *in, st_audit_gate *fallback,
                    const st_audit_gate **out)
{
    if (in->audit) {
        *out = in->audit->gates;
        return in->audit->ngates;
    }
    *out = NULL;
    const st_run_result *r = in->run;
    if (!r->gate_failed)
        return 0;
    memset(fallback, 0, sizeof *fallback);
    fallback->statement = (char *)"--fail-on";
    fallback->rule = (char *)"--fail-on";
    fallback->detail = r->gate_reason;
    fallback->value = NAN;
    fallback->limit = NAN;
    fallback->passed = 0;
    fallback->fails = 1;
    *out = fallback;
    return 1;
}

size_t st_rep_unmapped_count(const st_report_input *in)
{
    return in->audit ? in->audit->nunmapped : in->run->nunmapped;
}

void st_rep_unmapped_at(const st_report_input *in, size_t i, const char **field,
                        const char **value, uint64_t *count)
{
    if (in->audit) {
        *field = in->audit->unmapped[i].field;
        *value = in->audit->unmapped[i].value;
        *count = in->audit->unmapped[i].count;
    } else {
        *field = in->run->unmapped[i].field;
        *value = in->run->unmapped[i].value;
        *count = in->run->unmapped[i].count;
    }
}

const char *st_rep_gate_word(const st_audit_gate *g)
{
    return g->passed ? "passed" : g->fails ? "FAILED" : "warning";
}

int st_rep_gate_failed(const st_report_input *in)
{
    return in->run->gate_failed || (in->audit && in->audit->gate_failed);
}

void st_rep_balance_total(const st_run_result *r, st_run_layer *t)
{
    memset(t, 0, sizeof *t);
    for (size_t l = 0; l < r->nlayers; l++) {
        t->read += r->layers[l].read;
        t->kept += r->layers[l].kept;
        t->repaired += r->layers[l].repaired;
        t->duplicate += r->layers[l].duplicate;
        t->rejected += r->layers[l].rejected;
    }
}

size_t st_rep_mapped_districts(const st_audit *a)
{
    size_t n = 0;
    for (size_t i = 0; a && i < a->ndistricts; i++)
        if (a->districts[i].geom && !st_geom_is_empty(a->districts[i].geom))
            n++;
    return n;
}

/* ---- palettes ------------------------------------------------------------------
** Our own colours, light to dark. CIE L* (D65) of each, computed in
** tests/unit/test_report.c, rises by at least 10 from one class to the next,
** so the classes stay apart for every kind of colour vision and in grey
** print. Provenance and severity colours differ pairwise by at least 10 L*,
** and observed (blue) and assumed (orange) values lie on the blue-yellow
** axis that red-green colour blindness keeps. */

const char *const st_rep_ratio_colours[ST_REP_CLASSES] = {
    "#fbf8d5", "#b0d9a3", "#5fb3a0", "#2e8296", "#1f4a74"};
const double st_rep_ratio_breaks[ST_REP_CLASSES - 1] = {0.25, 0.5, 0.75, 0.9};
const char *const st_rep_assumed_colours[ST_REP_CLASSES] = {
    "#fdeedd", "#f5bb85", "#e07f55", "#b04a62", "#68285f"};
const double st_rep_assumed_breaks[ST_REP_CLASSES - 1] = {0.1, 0.25, 0.5, 0.75};
/* unknown, drawn, default, derived, source */
const char *const st_rep_prov_colours[ST_NPROV] = {
    "#efefef", "#f0c36d", "#b5651d", "#7fb2dc", "#1f4e79"};
/* note, warning, error */
const char *const st_rep_sev_colours[3] = {"#7d8fa8", "#e8b04a", "#a8322a"};

int st_rep_class(double v, const double *breaks)
{
    int c = 0;
    while (c < ST_REP_CLASSES - 1 && v >= breaks[c])
        c++;
    return c;
}

/* ---- distributions ---------------------------------------------------------- */

static const double area_edges[ST_REPORT_AREA_BINS] = {
    0, 5, 10, 20, 50, 100, 200, 500, 1000, 2000, 5000, 10000};
static const int storey_lo[ST_REPORT_STOREY_BINS] = {1, 2, 3, 4, 5, 6, 7, 8, 9, 10, 11, 16, 21, 31};

void st_report_area_bin(int i, double *lo, double *hi)
{
    *lo = area_edges[i];
    *hi = i + 1 < ST_REPORT_AREA_BINS ? area_edges[i + 1] : INFINITY;
}

void st_report_storey_bin(int i, int *lo, int *hi)
{
    *lo = storey_lo[i];
    *hi = i + 1 < ST_REPORT_STOREY_BINS ? storey_lo[i + 1] - 1 : -1;
}

/* Storeys as a whole number >= 1, or 0 when the text is not one. */
static long storeys_of(const char *text)
{
    if (!text)
        return 0;
    char *end;
    errno = 0;
    double v = strtod(text, &end);
    while (*end == ' ')
        end++;
    if (end == text || *end || errno || !(v >= 1) || v > 1e6)
        return 0;
    return (long)floor(v);
}

void st_report_dist_add(st_report_dist *d, const st_feature *f, int32_t storeys_field)
{
    d->buildings++;
    int b = 0;
    double a = isfinite(f->area_m2) ? f->area_m2 : 0;
    while (b + 1 < ST_REPORT_AREA_BINS && a >= area_edges[b + 1])
        b++;
    d->area[b]++;
    if (storeys_field < 0)
        return;
    d->has_storeys = 1;
    const st_field_value *v = (uint32_t)storeys_field < f->nschema ? &f->schema[storeys_field] : NULL;
    long s = v && v->from != ST_PROV_UNKNOWN ? storeys_of(v->text) : 0;
    if (s < 1) {
        d->storeys_unknown++;
        return;
    }
    int k = 0;
    while (k + 1 < ST_REPORT_STOREY_BINS && s >= storey_lo[k + 1])
        k++;
    if (v->from == ST_PROV_SOURCE || v->from == ST_PROV_DERIVED)
        d->storeys_observed[k]++;
    else
        d->storeys_assumed[k]++;
}

/* ---- files read -------------------------------------------------------------- */

st_status st_report_hash_files(st_report_file *files, size_t n, st_diags *diags)
{
    for (size_t i = 0; i < n; i++) {
        st_status rc = st_sha256_file(files[i].path, files[i].sha256, &files[i].bytes, diags);
        if (rc != ST_OK)
            return rc;
    }
    return ST_OK;
}

st_status st_report_file_siblings(const char *path, char ***paths, size_t *n)
{
    static const char *const exts[] = {".shx", ".dbf", ".prj", ".cpg"};
    *paths = st_calloc(1 + sizeof exts / sizeof *exts, sizeof **paths);
    *n = 0;
    if (!*paths)
        return ST_ERR_NOMEM;
    /* a layer spec "FILE.gpkg:LAYER" names FILE (when the spec is no file) */
    const char *colon = strrchr(path, ':');
    if (colon && access(path, F_OK) != 0)
        (*paths)[(*n)++] = st_strndup(path, (size_t)(colon - path));
    else
        (*paths)[(*n)++] = st_strdup(path);
    if (!(*paths)[0])
        goto nomem;
    path = (*paths)[0];
    size_t len = strlen(path);
    if (!st_str_ends_with_ci(path, ".shp"))
        return ST_OK;
    int upper = path[len - 1] == 'P';   /* X.SHP comes with X.DBF */
    for (size_t e = 0; e < sizeof exts / sizeof *exts; e++) {
        char *p = st_strdup_printf("%.*s%s", (int)(len - 4), path, exts[e]);
        if (!p)
            goto nomem;
        for (char *c = p + len - 3; upper && *c; c++)
            *c = (char)(*c - 'a' + 'A');
        if (access(p, R_OK) == 0)
            (*paths)[(*n)++] = p;
        else
            st_free(p);
    }
    return ST_OK;
nomem:
    for (size_t i = 0; i < *n; i++)
        st_free((*paths)[i]);
    st_free(*paths);
    *paths = NULL;
    *n = 0;
    return ST_ERR_NOMEM;
}

/* ---- writing files ------------------------------------------------------------- */

/* "dir/report.html" -> "dir/.report.tmp-PID.html" (same folder: atomic rename) */
static char *temp_name(const char *path)
{
    const char *slash = strrchr(path, '/');
    size_t dirlen = slash ? (size_t)(slash - path + 1) : 0;
    const char *base = path + dirlen;
    const char *dot = strrchr(base, '.');
    size_t stem = dot ? (size_t)(dot - base) : strlen(base);
    return st_strdup_printf("%.*s.%.*s.tmp-%ld%s", (int)dirlen, path, (int)stem, base,
                            (long)getpid(), dot ? dot : "");
}

static st_status write_all(const char *tmp, const char *final, const st_buf *b, st_diags *diags)
{
    st_loc loc = ST_LOC_FILE(final);
    FILE *fp = fopen(tmp, "wb");
    if (!fp)
        return st_diags_add(diags, ST_SEV_ERROR, ST_ERR_IO, &loc,
                            "cannot create the report: %s", strerror(errno));
    size_t w = b->len ? fwrite(b->data, 1, b->len, fp) : 0;
    int bad = w != b->len || fflush(fp) != 0;
    bad |= fclose(fp) != 0;
    if (bad) {
        remove(tmp);
        return st_diags_add(diags, ST_SEV_ERROR, ST_ERR_IO, &loc, "cannot write the report");
    }
    return ST_OK;
}

static st_status render_failed(st_status rc, const char *path, st_diags *diags)
{
    st_loc loc = ST_LOC_FILE(path);
    return st_diags_add(diags, ST_SEV_ERROR, rc, &loc, "cannot render the report: %s",
                        rc == ST_ERR_LIMIT ? "larger than the report size limit"
                                           : st_status_name(rc));
}

typedef st_status (*render_fn)(const st_report_input *, st_buf *);

/* Render with 'fn' and write to a temporary name; *tmp returns owned. */
static st_status render_to_temp(const st_report_input *in, render_fn fn, const char *path,
                                st_diags *diags, char **tmp)
{
    *tmp = NULL;
    st_buf b;
    st_buf_init(&b, ST_REPORT_MAX_BYTES);
    st_status rc = fn(in, &b);
    if (rc != ST_OK)
        rc = render_failed(rc, path, diags);
    if (rc == ST_OK) {
        *tmp = temp_name(path);
        rc = *tmp ? write_all(*tmp, path, &b, diags) : ST_ERR_NOMEM;
    }
    if (rc != ST_OK) {
        st_free(*tmp);
        *tmp = NULL;
    }
    st_buf_free(&b);
    return rc;
}

static st_status rename_into_place(const char *tmp, const char *path, st_diags *diags)
{
    if (rename(tmp, path) == 0)
        return ST_OK;
    st_loc loc = ST_LOC_FILE(path);
    st_diags_add(diags, ST_SEV_ERROR, ST_ERR_IO, &loc, "cannot rename the report into place: %s",
                 strerror(errno));
    remove(tmp);
    return ST_ERR_IO;
}

static st_status write_one(const st_report_input *in, render_fn fn, const char *path,
                           st_diags *diags)
{
    char *tmp = NULL;
    st_status rc = render_to_temp(in, fn, path, diags, &tmp);
    if (rc == ST_OK)
        rc = rename_into_place(tmp, path, diags);
    st_free(tmp);
    return rc;
}

st_status st_report_write_json(const st_report_input *in, const char *path, st_diags *diags)
{
    return write_one(in, st_report_json, path, diags);
}

st_status st_report_write_html(const st_report_input *in, const char *path, st_diags *diags)
{
    return write_one(in, st_report_html, path, diags);
}

struct st_report_pending {
    char *dir;          /* set when this run created the folder */
    char *path[2];      /* final: json, html */
    char *tmp[2];       /* written, not yet renamed */
};

void st_report_pending_free(st_report_pending *p)
{
    if (!p)
        return;
    for (int i = 0; i < 2; i++) {
        if (p->tmp[i])
            remove(p->tmp[i]);
        st_free(p->tmp[i]);
        st_free(p->path[i]);
    }
    if (p->dir)
        rmdir(p->dir);   /* only succeeds while empty: never removes user files */
    st_free(p->dir);
    st_free(p);
}

static st_status make_dir(const char *dir, st_report_pending *p, st_diags *diags)
{
    struct stat sb;
    st_loc loc = ST_LOC_FILE(dir);
    if (stat(dir, &sb) == 0) {
        if (S_ISDIR(sb.st_mode))
            return ST_OK;
        return st_diags_add(diags, ST_SEV_ERROR, ST_ERR_IO, &loc,
                            "--report needs a folder; this is a file");
    }
    if (mkdir(dir, 0777) != 0)
        return st_diags_add(diags, ST_SEV_ERROR, ST_ERR_IO, &loc,
                            "cannot create the report folder: %s", strerror(errno));
    p->dir = st_strdup(dir);
    if (!p->dir) {
        rmdir(dir);
        return ST_ERR_NOMEM;
    }
    return ST_OK;
}

st_status st_report_prepare(const st_report_input *in, const char *dir, st_diags *diags,
                            st_report_pending **out)
{
    *out = NULL;
    st_report_pending *p = st_calloc(1, sizeof *p);
    if (!p)
        return ST_ERR_NOMEM;
    size_t dl = strlen(dir);
    while (dl > 1 && dir[dl - 1] == '/')
        dl--;
    p->path[0] = st_strdup_printf("%.*s/report.json", (int)dl, dir);
    p->path[1] = st_strdup_printf("%.*s/report.html", (int)dl, dir);
    st_status rc = p->path[0] && p->path[1] ? ST_OK : ST_ERR_NOMEM;
    if (rc == ST_OK)
        rc = make_dir(dir, p, diags);
    if (rc == ST_OK)
        rc = render_to_temp(in, st_report_json, p->path[0], diags, &p->tmp[0]);
    if (rc == ST_OK)
        rc = render_to_temp(in, st_report_html, p->path[1], diags, &p->tmp[1]);
    if (rc != ST_OK) {
        st_report_pending_free(p);
        return rc;
    }
    *out = p;
    return ST_OK;
}

st_status st_report_commit(st_report_pending *p, st_diags *diags)
{
    for (int i = 0; i < 2; i++) {
        if (!p->tmp[i])
            continue;
        st_status rc = rename_into_place(p->tmp[i], p->path[i], diags);
        st_free(p->tmp[i]);
        p->tmp[i] = NULL;
        if (rc != ST_OK)
            return rc;
    }
    st_free(p->dir);   /* committed: the folder stays */
    p->dir = NULL;
    return ST_OK;
}

const char *st_report_pending_path(const st_report_pending *p, int html)
{
    return p->path[html ? 1 : 0];
}
