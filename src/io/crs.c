/*
** io/crs.c -- coordinate reference systems through PROJ: recognise a
** layer's CRS, name it, and transform its coordinates to lon/lat WGS 84.
**
** Input:   a CRS definition as a layer carries it: WKT from a .prj (OGC or
**          ESRI flavour, PROJ detects which), WKT from a GeoPackage,
**          "EPSG:n" (or a bare n), "OGC:CRS84" and its URN, or a PROJ
**          string ("+proj=utm +zone=38 +datum=WGS84"; "+type=crs" is added
**          when missing, since without it PROJ reads an operation).
** Output:  an st_crs_transform that maps x,y pairs in place to longitude,
**          latitude in degrees (EPSG:4326 with its axes swapped to east
**          first by proj_normalize_for_visualization, so data stored east
**          first -- as every format we read stores it -- goes in and lon/lat
**          comes out, whatever the authority's axis order: EPSG:3035 and
**          EPSG:4326 are northing/latitude first in the EPSG registry).
** Errors:  a definition PROJ cannot read, one that is not a CRS, or a CRS
**          with no known transformation to WGS 84 is ST_ERR_PROJ with one
**          diagnostic naming the file, quoting the definition (cut to
**          ST_CRS_QUOTE_MAX bytes) and PROJ's own last message. Points PROJ
**          cannot transform become infinite and are counted, not an error.
** Threads: every transform owns its PJ_CONTEXT (one per reader), and the
**          helpers st_crs_is_wgs84 / st_crs_identify make a short-lived
**          one per call, so no context is ever shared between threads.
** Limits:  definitions longer than ST_CRS_DEF_MAX bytes are refused
**          (ST_ERR_LIMIT); a .prj is a few hundred bytes.
*/
#include <math.h>
#include <stdio.h>
#include <string.h>

#include <proj.h>

#include "ioInt.h"

#define ST_CRS_QUOTE_MAX 80
#define ST_CRS_DEF_MAX (64 * 1024)
/* proj_identify's confidence is 0..100; 70 is what PROJ gives a PROJ string
** whose every parameter matches an EPSG CRS but which carries no name, so
** anything lower means some parameter or name differs. */
#define ST_CRS_IDENTIFY_MIN 70

/* A PROJ context with the last message PROJ logged on it. */
typedef struct proj_session {
    PJ_CONTEXT *ctx;
    char message[256];
} proj_session;

struct st_crs_transform {
    proj_session s;
    PJ *op;          /* normalised source -> lon/lat WGS 84 */
    char *name;      /* short name of the source CRS, owned */
};

/* PROJ calls this for every message at or above the context's log level
** (errors by default); the last one is kept for our diagnostic. */
static void on_proj_log(void *data, int level, const char *message)
{
    proj_session *s = data;
    (void)level;
    snprintf(s->message, sizeof s->message, "%s", message ? message : "");
}

static int session_open(proj_session *s)
{
    s->message[0] = '\0';
    s->ctx = proj_context_create();
    if (!s->ctx)
        return 0;
    proj_log_func(s->ctx, s, on_proj_log);
    return 1;
}

static void session_close(proj_session *s)
{
    if (s->ctx)
        proj_context_destroy(s->ctx);
    s->ctx = NULL;
}

static int all_digits(const char *s, size_t n)
{
    if (n == 0)
        return 0;
    for (size_t i = 0; i < n; i++)
        if (s[i] < '0' || s[i] > '9')
            return 0;
    return 1;
}

/* The definition ready for proj_create: surrounding white space and a
** UTF-8 byte-order mark removed (both occur in .prj files), a bare number
** read as an EPSG code, "+type=crs" added to a PROJ string. Returns 'def'
** itself when nothing changes (the usual case: no allocation), else an
** owned copy also stored in *owned; NULL on no memory. */
static const char *normalise_def(const char *def, char **owned)
{
    *owned = NULL;
    if (strncmp(def, "\xEF\xBB\xBF", 3) == 0)
        def += 3;
    while (*def == ' ' || *def == '\t' || *def == '\r' || *def == '\n')
        def++;
    size_t len = strlen(def), n = len;
    while (n > 0 && (def[n - 1] == ' ' || def[n - 1] == '\t' ||
                     def[n - 1] == '\r' || def[n - 1] == '\n'))
        n--;
    if (all_digits(def, n))
        *owned = st_strdup_printf("EPSG:%.*s", (int)n, def);
    else if (def[0] == '+' && !strstr(def, "+type=crs"))
        *owned = st_strdup_printf("%.*s +type=crs", (int)n, def);
    else if (n < len)
        *owned = st_strndup(def, n);
    else
        return def;
    return *owned;
}

/* Parse 'def' into a horizontal CRS on s's context: *out is an owned PJ.
** ST_ERR_PROJ with s->message saying why, or ST_ERR_NOMEM. A compound CRS
** gives its horizontal part (footprints are 2-D). */
static st_status parse_crs(proj_session *s, const char *def, PJ **out)
{
    *out = NULL;
    char *owned;
    const char *norm = normalise_def(def, &owned);
    if (!norm)
        return ST_ERR_NOMEM;
    PJ *crs = proj_create(s->ctx, norm);
    st_free(owned);
    if (!crs) {
        if (!s->message[0])
            snprintf(s->message, sizeof s->message, "not a definition PROJ knows");
        return ST_ERR_PROJ;
    }
    if (!proj_is_crs(crs)) {
        proj_destroy(crs);
        snprintf(s->message, sizeof s->message,
                 "this is a coordinate operation, not a coordinate reference system");
        return ST_ERR_PROJ;
    }
    if (proj_get_type(crs) == PJ_TYPE_COMPOUND_CRS) {
        PJ *horizontal = proj_crs_get_sub_crs(s->ctx, crs, 0);
        proj_destroy(crs);
        if (!horizontal) {
            snprintf(s->message, sizeof s->message, "compound CRS without a horizontal part");
            return ST_ERR_PROJ;
        }
        crs = horizontal;
    }
    *out = crs;
    return ST_OK;
}

/* 1 if crs is lon/lat (or lat/lon) on WGS 84: the same as OGC:CRS84 except
** perhaps for the axis order, which is what EPSG:4326 and an ESRI
** GCS_WGS_1984 .prj are. */
static int pj_is_wgs84(proj_session *s, PJ *crs)
{
    PJ *crs84 = proj_create(s->ctx, "OGC:CRS84");
    if (!crs84)
        return 0;
    int same = proj_is_equivalent_to_with_ctx(
        s->ctx, crs, crs84, PJ_COMP_EQUIVALENT_EXCEPT_AXIS_ORDER_GEOGCRS);
    proj_destroy(crs84);
    return same;
}

/* Returns owned short name of a parsed CRS: "AUTH:code" from the object's
** own identifier, else the best EPSG match PROJ is confident about, else
** the CRS's name. NULL only on no memory. */
static char *pj_short_name(proj_session *s, PJ *crs)
{
    const char *auth = proj_get_id_auth_name(crs, 0);
    const char *code = proj_get_id_code(crs, 0);
    if (auth && code)
        return st_strdup_printf("%s:%s", auth, code);
    char *name = NULL;
    int *confidence = NULL;
    PJ_OBJ_LIST *matches = proj_identify(s->ctx, crs, "EPSG", NULL, &confidence);
    if (matches && proj_list_get_count(matches) > 0 && confidence &&
        confidence[0] >= ST_CRS_IDENTIFY_MIN) {
        PJ *best = proj_list_get(s->ctx, matches, 0);
        const char *best_code = best ? proj_get_id_code(best, 0) : NULL;
        if (best_code)
            name = st_strdup_printf("EPSG:%s", best_code);
        proj_destroy(best);
    }
    proj_list_destroy(matches);
    proj_int_list_destroy(confidence);
    if (name)
        return name;
    const char *own = proj_get_name(crs);
    return st_strdup(own && strcmp(own, "unknown") != 0 ? own : "unnamed CRS");
}

/* The definition as a short one-line quote for a message: line breaks
** become spaces, cut to ST_CRS_QUOTE_MAX bytes on a UTF-8 boundary. */
static void quote_def(const char *def, char *out, size_t outlen)
{
    size_t n = strlen(def);
    size_t cut = n > ST_CRS_QUOTE_MAX ? st_utf8_valid_prefix(def, ST_CRS_QUOTE_MAX) : n;
    snprintf(out, outlen, "%.*s%s", (int)cut, def, cut < n ? "..." : "");
    for (char *p = out; *p; p++)
        if (*p == '\n' || *p == '\r' || *p == '\t')
            *p = ' ';
}

static st_status crs_fail(st_diags *diags, const char *file, const char *def,
                          const char *what, const char *proj_says)
{
    char quoted[ST_CRS_QUOTE_MAX + 8];
    quote_def(def, quoted, sizeof quoted);
    st_loc loc = ST_LOC_FILE(file);
    return st_diags_add(diags, ST_SEV_ERROR, ST_ERR_PROJ, &loc,
                        "%s coordinate reference system \"%s\"%s%s%s", what, quoted,
                        proj_says && proj_says[0] ? " (PROJ: " : "",
                        proj_says && proj_says[0] ? proj_says : "",
                        proj_says && proj_says[0] ? ")" : "");
}

/* Build t->op from the parsed source CRS. */
static st_status make_operation(st_crs_transform *t, PJ *src, const char *file,
                                const char *def, st_diags *diags)
{
    PJ *dst = proj_create(t->s.ctx, "EPSG:4326");
    if (!dst)
        return crs_fail(diags, file, def, "cannot prepare a transformation from the",
                        "EPSG:4326 is missing from PROJ's database");
    PJ *op = proj_create_crs_to_crs_from_pj(t->s.ctx, src, dst, NULL, NULL);
    proj_destroy(dst);
    if (!op)
        return crs_fail(diags, file, def, "no transformation to WGS 84 from the",
                        t->s.message);
    t->op = proj_normalize_for_visualization(t->s.ctx, op);
    proj_destroy(op);
    if (!t->op)
        return crs_fail(diags, file, def, "cannot normalise the axis order of the",
                        t->s.message);
    return ST_OK;
}

st_status st_crs_to_wgs84(const char *source, const char *file, st_diags *diags,
                          st_crs_transform **out)
{
    *out = NULL;
    st_loc loc = ST_LOC_FILE(file);
    if (strlen(source) > ST_CRS_DEF_MAX)
        return st_diags_add(diags, ST_SEV_ERROR, ST_ERR_LIMIT, &loc,
                            "coordinate reference system definition longer than %d bytes",
                            ST_CRS_DEF_MAX);
    st_crs_transform *t = st_calloc(1, sizeof *t);
    if (!t)
        return ST_ERR_NOMEM;
    if (!session_open(&t->s)) {
        st_free(t);
        return st_diags_add(diags, ST_SEV_ERROR, ST_ERR_PROJ, &loc,
                            "cannot create a PROJ context");
    }
    PJ *src = NULL;
    st_status rc = parse_crs(&t->s, source, &src);
    if (rc == ST_ERR_PROJ)
        rc = crs_fail(diags, file, source, "unknown", t->s.message);
    else if (rc != ST_OK)
        ;   /* no memory: no diagnostic either */
    else if (pj_is_wgs84(&t->s, src))
        rc = ST_OK;   /* nothing to do: *out stays NULL */
    else if (!(t->name = pj_short_name(&t->s, src)))
        rc = ST_ERR_NOMEM;
    else
        rc = make_operation(t, src, file, source, diags);
    proj_destroy(src);
    if (rc != ST_OK || !t->op) {
        st_crs_free(t);
        return rc;
    }
    *out = t;
    return ST_OK;
}

st_status st_crs_apply(st_crs_transform *t, double *xy, size_t n, size_t *failed)
{
    *failed = 0;
    if (!t || n == 0)
        return ST_OK;
    proj_errno_reset(t->op);
    proj_trans_generic(t->op, PJ_FWD, xy, 2 * sizeof *xy, n, xy + 1, 2 * sizeof *xy, n,
                       NULL, 0, 0, NULL, 0, 0);
    /* PROJ marks a point it could not transform with HUGE_VAL; make every
    ** such point (and a NaN that went in) uniformly infinite. */
    for (size_t i = 0; i < n; i++)
        if (!isfinite(xy[2 * i]) || !isfinite(xy[2 * i + 1])) {
            xy[2 * i] = xy[2 * i + 1] = INFINITY;
            (*failed)++;
        }
    proj_errno_reset(t->op);
    return ST_OK;
}

const char *st_crs_name(const st_crs_transform *t)
{
    return t && t->name ? t->name : "EPSG:4326";
}

st_status st_crs_box_to_source(st_crs_transform *t, const double in[4], double out[4])
{
    double b[4];
    proj_errno_reset(t->op);
    if (!proj_trans_bounds(t->s.ctx, t->op, PJ_INV, in[0], in[1], in[2], in[3], &b[0],
                           &b[1], &b[2], &b[3], 21))
        return ST_ERR_PROJ;
    for (int i = 0; i < 4; i++)
        if (!isfinite(b[i]))
            return ST_ERR_PROJ;
    /* the edges between the densified points bow: 5% a side covers them
    ** for any window a part reads (kilometres, not continents) */
    double mx = 0.05 * (b[2] - b[0]), my = 0.05 * (b[3] - b[1]);
    out[0] = b[0] - mx;
    out[1] = b[1] - my;
    out[2] = b[2] + mx;
    out[3] = b[3] + my;
    return ST_OK;
}

void st_crs_free(st_crs_transform *t)
{
    if (!t)
        return;
    proj_destroy(t->op);
    session_close(&t->s);
    st_free(t->name);
    st_free(t);
}

int st_crs_is_wgs84(const char *def)
{
    if (!def || strlen(def) > ST_CRS_DEF_MAX)
        return 0;
    proj_session s;
    if (!session_open(&s))
        return 0;
    PJ *crs = NULL;
    int yes = parse_crs(&s, def, &crs) == ST_OK && pj_is_wgs84(&s, crs);
    proj_destroy(crs);
    session_close(&s);
    return yes;
}

char *st_crs_identify(const char *def)
{
    if (!def || strlen(def) > ST_CRS_DEF_MAX)
        return NULL;
    proj_session s;
    if (!session_open(&s))
        return NULL;
    PJ *crs = NULL;
    char *name = parse_crs(&s, def, &crs) == ST_OK ? pj_short_name(&s, crs) : NULL;
    proj_destroy(crs);
    session_close(&s);
    return name;
}
