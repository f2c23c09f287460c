/*
** io/shp.c -- ESRI Shapefile reader and writer, through Shapelib.
**
** Input:   'name.shp' with its index 'name.shx' and attribute table
**          'name.dbf' (all three required; one record each per feature, in
**          the same order), optionally 'name.prj' (CRS as WKT) and
**          'name.cpg' (code page of the DBF text). Sidecars are looked up
**          with a lowercase extension first, then an uppercase one.
** Output:  reader -- one feature per record in record order (records the
**          DBF marks deleted are skipped); source_id is the 1-based record
**          number; attributes as UTF-8 text, typed in the layer's fields.
**          writer -- name.shp .shx .dbf .prj .cpg, built beside the target
**          under the writer's temporary stem and renamed together on commit.
** Errors:  a missing or truncated .shp/.shx/.dbf, any of the files not a
**          regular file (a FIFO would block for ever), or a .dbf whose record
**          count differs from the .shp, is ST_ERR_FORMAT naming the file; a
**          record Shapelib cannot decode is ST_ERR_FORMAT with the feature
**          index and Shapelib's own message; failed writes are ST_ERR_IO.
** Limits:  ST_SHP_MAX_VERTICES vertices and ST_SHP_MAX_PARTS parts per
**          shape, ST_SHP_MAX_SIDECAR bytes of .prj/.cpg, ST_SHP_MAX_VALUE
**          bytes per attribute value: each ST_ERR_LIMIT. The writer refuses
**          (ST_ERR_LIMIT) before a .shp or .dbf would pass 2 GB.
**
** Rings. The Shapefile Technical Description (ESRI, July 1998) defines the
** inside of a ring as the neighbourhood to the right of an observer walking
** it: shells are clockwise, holes counter-clockwise, and the order of rings
** in a record means nothing. The reader classifies each ring by the sign
** of its area, gives each hole to the smallest shell that contains it (a
** point-in-ring test on a hole vertex; no GEOS needed), and keeps a hole
** that lies in no shell as a polygon of its own, so the data is not lost
** and the footprint stage can flag it. The writer orients rings the same
** way (st_geom_orient(.., 0)).
**
** Text encoding of the DBF, the first rule that applies:
**   1. a .cpg file: "UTF-8", "UTF8" or "65001" -> taken as UTF-8; a code
**      page number (1252, 1251, 28591, ...), "ANSI 1252", "8859-1" or any
**      name iconv knows -> converted with iconv; an unknown name -> one
**      warning, then rule 2;
**   2. the DBF language driver byte (LDID, header byte 29) for the codes in
**      ldid_table below -> converted with iconv;
**   3. nothing says: text that is valid UTF-8 is kept as it is, anything
**      else is decoded as Windows-1252.
** Invalid bytes never pass through: whatever is not valid in the stated
** encoding becomes U+FFFD (iconv errors, then st_utf8_sanitize).
*/
#include <errno.h>
#include <iconv.h>
#include <limits.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <strings.h>
#include <sys/stat.h>

#include <shapefil.h>

#include "ioInt.h"

#define ST_SHP_MAX_VERTICES 10000000     /* per shape */
#define ST_SHP_MAX_PARTS 100000          /* rings (or lines, points) per shape;
                                            bounds the hole-to-shell matching */
#define ST_SHP_MAX_SIDECAR (64 * 1024)   /* bytes of .prj or .cpg */
#define ST_SHP_MAX_VALUE 65535           /* bytes of one DBF value (the format's
                                            own field width limit) */
#define ST_SHP_MAX_FIELDS 2046           /* a dBASE header is at most 64 KiB */
#define ST_SHP_MAX_FILE 2147483647LL     /* 2 GB per .shp/.dbf (ESRI) */

/* ---- Shapelib's error and I/O hooks ---------------------------------- */

/*
** Shapelib reports problems through SAHooks.Error(message), which gets no
** context pointer, and its close functions return nothing. So each call
** into Shapelib is bracketed: capture_begin() clears this per-thread slot,
** the hooks below record Shapelib's first message and any failed write,
** flush or close in it, and the caller reads it right after the call. It
** is the module's only state outside its handles, it belongs to the
** calling thread, and it means something only inside one bracket.
*/
typedef struct shapelib_capture {
    int failed;          /* an error was reported or an I/O call failed */
    char message[256];   /* the first message, "" if none */
} shapelib_capture;

static _Thread_local shapelib_capture capture;

static void capture_begin(void)
{
    capture.failed = 0;
    capture.message[0] = '\0';
}

/* Shapelib's words for the last failure, or 'fallback'. */
static const char *capture_text(const char *fallback)
{
    return capture.message[0] ? capture.message : fallback;
}

static void capture_note(const char *what, const char *detail)
{
    capture.failed = 1;
    if (capture.message[0])
        return;
    snprintf(capture.message, sizeof capture.message, "%s%s%s", what,
             detail ? ": " : "", detail ? detail : "");
    size_t n = strlen(capture.message);
    while (n > 0 && (capture.message[n - 1] == '\n' || capture.message[n - 1] == ' '))
        capture.message[--n] = '\0';
}

static void hook_error(const char *message)
{
    capture_note(message, NULL);
}

static SAOffset hook_write(void *p, SAOffset size, SAOffset n, SAFile file)
{
    size_t done = fwrite(p, (size_t)size, (size_t)n, (FILE *)file);
    if (done != (size_t)n)
        capture_note("write failed", strerror(errno));
    return (SAOffset)done;
}

static int hook_flush(SAFile file)
{
    int rc = fflush((FILE *)file);
    if (rc != 0)
        capture_note("flush failed", strerror(errno));
    return rc;
}

static int hook_close(SAFile file)
{
    int rc = fclose((FILE *)file);
    if (rc != 0)
        capture_note("close failed", strerror(errno));
    return rc;
}

/*
** Opening for reading: only a regular file. A FIFO (or a device) as the
** .shp or one of its sidecars would block the open, or the reads, for
** ever; opened without blocking and checked with fstat on the descriptor,
** it is refused with EINVAL instead. Writing opens as Shapelib does.
*/
static SAFile hook_open(const char *path, const char *access)
{
    if (strchr(access, 'w') || strchr(access, '+') || strchr(access, 'a'))
        return (SAFile)fopen(path, access);
    FILE *fp = st_fopen_regular(path);
    if (!fp && errno == EINVAL)
        capture_note("not a regular file", path);
    return (SAFile)fp;
}

/* hook_open for our own reads of headers and sidecars. */
static FILE *open_for_reading(const char *path)
{
    return (FILE *)hook_open(path, "rb");
}

/* Why open_for_reading failed (right after it). */
static const char *open_error(void)
{
    return st_open_error(errno);
}

/* Shapelib's stdio hooks with our error and write checks. */
static void hooks_init(SAHooks *h)
{
    SASetupDefaultHooks(h);
    h->FOpen = hook_open;
    h->FWrite = hook_write;
    h->FFlush = hook_flush;
    h->FClose = hook_close;
    h->Error = hook_error;
}

/* ---- small file helpers --------------------------------------------- */

/* Size of the file at 'path' in bytes, or -1 (errno set). */
static long long file_size(const char *path)
{
    struct stat st;
    if (stat(path, &st) != 0)
        return -1;
    return (long long)st.st_size;
}

/* Returns owned 'path' without its extension, or NULL on no memory. */
static char *path_without_ext(const char *path)
{
    return st_strndup(path, strlen(path) - strlen(st_path_ext(path)));
}

/*
** Returns owned path of the sidecar 'ext' (".dbf") beside 'stem': the
** lowercase name when it exists, else the uppercase one when that exists,
** else the lowercase one with *exists = 0. NULL on no memory.
*/
static char *sidecar_path(const char *stem, const char *ext, int *exists)
{
    char upper[8];
    size_t n = strlen(ext);
    for (size_t i = 0; i <= n && i < sizeof upper; i++)
        upper[i] = (char)(ext[i] >= 'a' && ext[i] <= 'z' ? ext[i] - 32 : ext[i]);
    upper[sizeof upper - 1] = '\0';
    *exists = 1;
    char *p = st_strdup_printf("%s%s", stem, ext);
    if (!p || file_size(p) >= 0)
        return p;
    char *q = st_strdup_printf("%s%s", stem, upper);
    if (!q || file_size(q) >= 0) {
        st_free(p);
        return q;
    }
    st_free(q);
    *exists = 0;
    return p;
}

/* Error about 'file' (a sidecar or the .shp itself) at feature 'index'. */
static st_status fail_file(st_reader *r, const char *file, st_status code,
                           long long index, const char *fmt, ...) ST_PRINTF(5, 6);
static st_status fail_file(st_reader *r, const char *file, st_status code,
                           long long index, const char *fmt, ...)
{
    st_loc loc = ST_LOC_FEATURE(file, index);
    va_list ap;
    va_start(ap, fmt);
    st_diags_addv(r->diags, ST_SEV_ERROR, code, &loc, fmt, ap);
    va_end(ap);
    return code;
}

/* The file's base name, for messages that name one file from another. */
static const char *base_name(const char *path)
{
    const char *slash = strrchr(path, '/');
    return slash ? slash + 1 : path;
}

/*
** Read the small text file 'path' (a .prj or .cpg) into *out: returns owned
** text without surrounding white space or a UTF-8 byte-order mark.
*/
static st_status read_sidecar_text(st_reader *r, const char *path, char **out)
{
    *out = NULL;
    FILE *fp = open_for_reading(path);
    if (!fp)
        return fail_file(r, path, ST_ERR_IO, -1, "cannot open: %s", open_error());
    st_buf b;
    st_buf_init(&b, ST_SHP_MAX_SIDECAR);
    char chunk[4096];
    st_status rc = ST_OK;
    size_t n;
    while (rc == ST_OK && (n = fread(chunk, 1, sizeof chunk, fp)) > 0)
        rc = st_buf_append(&b, chunk, n);
    if (rc == ST_OK && ferror(fp))
        rc = fail_file(r, path, ST_ERR_IO, -1, "cannot read: %s", strerror(errno));
    else if (rc == ST_ERR_LIMIT)
        rc = fail_file(r, path, ST_ERR_LIMIT, -1, "longer than %d bytes; this is "
                       "not a projection or code page file", ST_SHP_MAX_SIDECAR);
    fclose(fp);
    if (rc != ST_OK) {
        st_buf_free(&b);
        return rc;
    }
    char *text = st_buf_take(&b);
    if (!text)
        return ST_ERR_NOMEM;
    char *start = text;
    if (strncmp(start, "\xEF\xBB\xBF", 3) == 0)
        start += 3;
    while (*start == ' ' || *start == '\t' || *start == '\r' || *start == '\n')
        start++;
    size_t len = strlen(start);
    while (len > 0 && strchr(" \t\r\n", start[len - 1]))
        len--;
    memmove(text, start, len);
    text[len] = '\0';
    *out = text;
    return ST_OK;
}

/* Big-endian and little-endian 32-bit integers of a file header. */
static uint32_t be32(const unsigned char *p)
{
    return (uint32_t)p[0] << 24 | (uint32_t)p[1] << 16 | (uint32_t)p[2] << 8 | p[3];
}

/*
** Check the 100-byte header of a .shp or .shx: file code 9994 and a file
** length (in 16-bit words) the file really has. Shapelib trusts these
** numbers; checking them here gives a message that names the file.
*/
static st_status check_main_header(st_reader *r, const char *path, const char *what)
{
    long long size = file_size(path);
    if (size < 0)
        return fail_file(r, path, ST_ERR_IO, -1, "cannot open: %s", strerror(errno));
    if (size < 100)
        return fail_file(r, path, ST_ERR_FORMAT, -1,
                         "truncated %s: %lld bytes, but its header alone is 100",
                         what, size);
    unsigned char h[100];
    FILE *fp = open_for_reading(path);
    if (!fp)
        return fail_file(r, path, ST_ERR_IO, -1, "cannot open: %s", open_error());
    size_t got = fread(h, 1, sizeof h, fp);
    fclose(fp);
    if (got != sizeof h)
        return fail_file(r, path, ST_ERR_IO, -1, "cannot read its header");
    if (be32(h) != 9994)
        return fail_file(r, path, ST_ERR_FORMAT, -1,
                         "not a %s: file code %u, expected 9994", what, be32(h));
    long long declared = 2LL * (be32(h + 24) & 0x7FFFFFFFu);
    if (declared > size)
        return fail_file(r, path, ST_ERR_FORMAT, -1,
                         "truncated %s: its header says %lld bytes, the file has %lld",
                         what, declared, size);
    return ST_OK;
}

/* ---- text decoding ---------------------------------------------------- */

enum { ENC_GUESS, ENC_UTF8, ENC_ICONV };   /* ENC_GUESS = 0: the default */

/*
** DBF language driver IDs (header byte 29) and their code pages. 0x01,
** 0x02 and 0x03 are from the ArcPad documentation (REFERENCES.md §6); the
** rest are from memory. 0x57 is written by many tools meaning "ANSI",
** taken as Windows-1252 (common practice, from memory).
*/
static const struct { int ldid; const char *charset; } ldid_table[] = {
    {0x01, "CP437"},  {0x02, "CP850"},  {0x03, "CP1252"}, {0x57, "CP1252"},
    {0x64, "CP852"},  {0x65, "CP866"},  {0xC8, "CP1250"}, {0xC9, "CP1251"},
    {0xCA, "CP1254"}, {0xCB, "CP1253"},
};

/*
** Turn the text of a .cpg into an iconv name in buf. Returns 1 when it
** names UTF-8 (nothing to convert), 0 otherwise. Unknown names are passed
** on as they are; iconv_open decides.
*/
static int cpg_charset(const char *cpg, char *buf, size_t n)
{
    const char *s = cpg;
    if (strncasecmp(s, "ANSI ", 5) == 0)
        s += 5;
    if (strcasecmp(s, "UTF-8") == 0 || strcasecmp(s, "UTF8") == 0 ||
        strcmp(s, "65001") == 0)
        return 1;
    if (strncmp(s, "8859", 4) == 0) {        /* "8859-1", "8859_15", "88591" */
        const char *part = s + 4 + (s[4] == '-' || s[4] == '_');
        snprintf(buf, n, "ISO-8859-%s", part);
        return 0;
    }
    size_t digits = strspn(s, "0123456789");
    if (digits > 0 && digits < 7 && s[digits] == '\0') {
        long cp = strtol(s, NULL, 10);
        if (cp >= 28591 && cp <= 28605)      /* Windows numbers of ISO-8859-x */
            snprintf(buf, n, "ISO-8859-%ld", cp - 28590);
        else
            snprintf(buf, n, "CP%ld", cp);
        return 0;
    }
    snprintf(buf, n, "%s", s);
    return 0;
}

/* Open an iconv converter from 'charset' to UTF-8. */
static st_status open_converter(const char *charset, iconv_t *cd)
{
    *cd = iconv_open("UTF-8", charset);
    if (*cd != (iconv_t)-1)
        return ST_OK;
    return errno == ENOMEM ? ST_ERR_NOMEM : ST_ERR_FORMAT;
}

/* ---- reader ------------------------------------------------------------ */

/* One ring of a polygon record while it is being assembled. */
typedef struct ring_info {
    uint32_t first, count;     /* vertex range in the SHPObject */
    double area;               /* signed; counter-clockwise positive */
    double box[4];             /* minx miny maxx maxy */
    int is_hole;
    int32_t shell;             /* hole: its shell's ring index, -1 none */
    int32_t first_hole, last_hole, next_hole;   /* holes in file order */
} ring_info;

typedef struct shp_reader {
    SAHooks hooks;             /* copied into the handles by Shapelib */
    SHPHandle shp;
    DBFHandle dbf;
    char *dbf_path;            /* owned */
    int nrec;
    int next;                  /* next record, 0-based */
    int nfields;
    char *dbf_types;           /* native DBF type of each field, owned */
    int enc;                   /* ENC_* */
    iconv_t cd;                /* (iconv_t)-1 when unused */
    char *conv;                /* iconv output, owned */
    size_t conv_cap;
    ring_info *rings;          /* polygon assembly scratch, owned */
    uint32_t cap_rings;
} shp_reader;

static int shp_probe(const char *path)
{
    return st_str_ends_with_ci(path, ".shp");
}

static const char *shape_type_name(int t)
{
    switch (t) {
    case SHPT_NULL: return "Null";
    case SHPT_POINT: return "Point";
    case SHPT_ARC: return "Arc";
    case SHPT_POLYGON: return "Polygon";
    case SHPT_MULTIPOINT: return "MultiPoint";
    case SHPT_POINTZ: return "PointZ";
    case SHPT_ARCZ: return "ArcZ";
    case SHPT_POLYGONZ: return "PolygonZ";
    case SHPT_MULTIPOINTZ: return "MultiPointZ";
    case SHPT_POINTM: return "PointM";
    case SHPT_ARCM: return "ArcM";
    case SHPT_POLYGONM: return "PolygonM";
    case SHPT_MULTIPOINTM: return "MultiPointM";
    case SHPT_MULTIPATCH: return "MultiPatch";
    }
    return "unknown";
}

static int shape_type_supported(int t)
{
    return t != SHPT_MULTIPATCH && strcmp(shape_type_name(t), "unknown") != 0;
}

/* Open the .shp (with its .shx) and check that every record Shapelib's
** index points to lies inside the .shp. */
static st_status open_shapes(st_reader *r, shp_reader *s, const char *stem)
{
    int found;
    char *shx = sidecar_path(stem, ".shx", &found);
    if (!shx)
        return ST_ERR_NOMEM;
    st_status rc = ST_OK;
    if (!found)
        rc = fail_file(r, r->path, ST_ERR_FORMAT, -1,
                       "its index file %s is missing (a shapefile needs .shp, .shx "
                       "and .dbf)", base_name(shx));
    if (rc == ST_OK)
        rc = check_main_header(r, r->path, "shapefile");
    if (rc == ST_OK)
        rc = check_main_header(r, shx, "shapefile index");
    if (rc == ST_OK) {
        capture_begin();
        s->shp = SHPOpenLL(r->path, "rb", &s->hooks);
        if (!s->shp)
            rc = fail_file(r, r->path, ST_ERR_FORMAT, -1, "Shapelib cannot open it: %s",
                           capture_text("unknown reason"));
    }
    st_free(shx);
    if (rc != ST_OK)
        return rc;
    if (!shape_type_supported(s->shp->nShapeType))
        return fail_file(r, r->path, ST_ERR_FORMAT, -1,
                         "shape type %s (%d) is not supported; expected Polygon, "
                         "Point, MultiPoint or Arc, with or without Z or M",
                         shape_type_name(s->shp->nShapeType), s->shp->nShapeType);
    s->nrec = s->shp->nRecords;
    long long size = file_size(r->path);
    for (int i = 0; i < s->nrec; i++) {
        unsigned long long end = (unsigned long long)s->shp->panRecOffset[i] + 8 +
                                 s->shp->panRecSize[i];
        if (end > (unsigned long long)size)
            return fail_file(r, r->path, ST_ERR_FORMAT, i,
                             "truncated shapefile: record %d ends at byte %llu, but "
                             "the file has %lld bytes", i + 1, end, size);
    }
    r->bytes_total = size;
    r->count_hint = s->nrec;
    return ST_OK;
}

/* Open the .dbf and check its size and record count against the .shp. */
static st_status open_table(st_reader *r, shp_reader *s, const char *stem)
{
    int found;
    s->dbf_path = sidecar_path(stem, ".dbf", &found);
    if (!s->dbf_path)
        return ST_ERR_NOMEM;
    if (!found)
        return fail_file(r, r->path, ST_ERR_FORMAT, -1,
                         "its attribute table %s is missing (a shapefile needs .shp, "
                         ".shx and .dbf)", base_name(s->dbf_path));
    capture_begin();
    s->dbf = DBFOpenLL(s->dbf_path, "rb", &s->hooks);
    if (!s->dbf)
        return fail_file(r, s->dbf_path, ST_ERR_FORMAT, -1,
                         "Shapelib cannot read this attribute table: %s",
                         capture_text("not a dBASE file"));
    long long size = file_size(s->dbf_path);
    long long need = (long long)s->dbf->nHeaderLength +
                     (long long)s->dbf->nRecords * s->dbf->nRecordLength;
    if (size < need)
        return fail_file(r, s->dbf_path, ST_ERR_FORMAT, -1,
                         "truncated attribute table: its header promises %d records "
                         "of %d bytes (%lld bytes in all), the file has %lld",
                         s->dbf->nRecords, s->dbf->nRecordLength, need, size);
    if (s->dbf->nRecords != s->nrec)
        return fail_file(r, s->dbf_path, ST_ERR_FORMAT, -1,
                         "has %d records but %s has %d; a shapefile needs one "
                         "attribute record per shape", s->dbf->nRecords,
                         base_name(r->path), s->nrec);
    return ST_OK;
}

/* Choose the text decoding (see the file header for the rule). */
static st_status setup_encoding(st_reader *r, shp_reader *s, const char *stem)
{
    int found;
    char *cpg_path = sidecar_path(stem, ".cpg", &found);
    if (!cpg_path)
        return ST_ERR_NOMEM;
    char *cpg = NULL;
    st_status rc = found ? read_sidecar_text(r, cpg_path, &cpg) : ST_OK;
    char charset[64];
    if (rc == ST_OK && cpg && cpg[0]) {
        if (cpg_charset(cpg, charset, sizeof charset)) {
            s->enc = ENC_UTF8;
        } else {
            rc = open_converter(charset, &s->cd);
            if (rc == ST_OK) {
                s->enc = ENC_ICONV;
            } else if (rc == ST_ERR_FORMAT) {
                st_loc loc = ST_LOC_FILE(cpg_path);
                st_diags_add(r->diags, ST_SEV_WARNING, ST_ERR_FORMAT, &loc,
                             "unknown code page '%s'; text is read as the DBF "
                             "header says, else as UTF-8 where valid, else as "
                             "Windows-1252", cpg);
                rc = ST_OK;
            }
        }
    }
    st_free(cpg);
    st_free(cpg_path);
    if (rc != ST_OK || s->enc == ENC_UTF8 || s->enc == ENC_ICONV)
        return rc;
    const char *by_ldid = NULL;
    for (size_t i = 0; i < sizeof ldid_table / sizeof ldid_table[0]; i++)
        if (ldid_table[i].ldid == s->dbf->iLanguageDriver)
            by_ldid = ldid_table[i].charset;
    rc = open_converter(by_ldid ? by_ldid : "CP1252", &s->cd);
    if (rc == ST_ERR_FORMAT)   /* iconv without the code page: sanitize only */
        rc = ST_OK;
    s->enc = by_ldid ? ENC_ICONV : ENC_GUESS;
    return rc;
}

/* Grow the iconv output buffer to at least 'need' bytes. */
static st_status reserve_conv(shp_reader *s, size_t need)
{
    if (need <= s->conv_cap)
        return ST_OK;
    char *p = st_realloc(s->conv, need);
    if (!p)
        return ST_ERR_NOMEM;
    s->conv = p;
    s->conv_cap = need;
    return ST_OK;
}

/* Convert raw[0..n) with s->cd into s->conv; bytes iconv rejects become
** U+FFFD. Returns the output length in *len. */
static st_status convert(shp_reader *s, const char *raw, size_t n, size_t *len)
{
    st_status rc = reserve_conv(s, 4 * n + 8);
    if (rc != ST_OK)
        return rc;
    iconv(s->cd, NULL, NULL, NULL, NULL);
    char *in = (char *)raw, *out = s->conv;
    size_t inleft = n, outleft = s->conv_cap - 1;
    while (inleft > 0) {
        if (iconv(s->cd, &in, &inleft, &out, &outleft) != (size_t)-1)
            break;
        if (errno == E2BIG) {
            size_t used = (size_t)(out - s->conv);
            if ((rc = reserve_conv(s, 2 * s->conv_cap)) != ST_OK)
                return rc;
            out = s->conv + used;
            outleft = s->conv_cap - 1 - used;
            continue;
        }
        if (outleft < 3 && (rc = reserve_conv(s, s->conv_cap + 8)) != ST_OK)
            return rc;
        memcpy(out, "\xEF\xBF\xBD", 3);   /* EILSEQ or a cut-off sequence */
        out += 3;
        outleft -= 3;
        in++;
        inleft--;
        iconv(s->cd, NULL, NULL, NULL, NULL);
    }
    *len = (size_t)(out - s->conv);
    return ST_OK;
}

/* Returns owned UTF-8 text of the DBF bytes raw[0..n) (see the encoding
** rule in the file header), or NULL on no memory. */
static char *decode_text(shp_reader *s, const char *raw, size_t n)
{
    int ascii = 1;
    for (size_t i = 0; i < n && ascii; i++)
        ascii = (unsigned char)raw[i] < 0x80;
    if (ascii || s->enc == ENC_UTF8 || s->cd == (iconv_t)-1 ||
        (s->enc == ENC_GUESS && st_utf8_valid_prefix(raw, n) == n))
        return st_utf8_sanitize(raw, n);
    size_t len = 0;
    if (convert(s, raw, n, &len) != ST_OK)
        return NULL;
    return st_utf8_sanitize(s->conv, len);
}

static st_field_type field_type_of(char native, int decimals)
{
    switch (native) {
    case 'N': return decimals > 0 ? ST_FIELD_REAL : ST_FIELD_INTEGER;
    case 'F': return ST_FIELD_REAL;
    case 'L': return ST_FIELD_BOOLEAN;
    default: return ST_FIELD_TEXT;   /* C, D (as YYYY-MM-DD), others raw */
    }
}

/* Add DBF field j to r->fields under a unique, non-empty UTF-8 name (the
** field list must stay index-aligned with the DBF). */
static st_status add_field(st_reader *r, shp_reader *s, int j)
{
    char raw[XBASE_FLDNAME_LEN_READ + 1];
    int width = 0, decimals = 0;
    DBFGetFieldInfo(s->dbf, j, raw, &width, &decimals);
    s->dbf_types[j] = DBFGetNativeFieldType(s->dbf, j);
    char *name = decode_text(s, raw, strlen(raw));
    if (name && !name[0]) {
        st_free(name);
        name = st_strdup_printf("field_%d", j + 1);
    }
    if (!name)
        return ST_ERR_NOMEM;
    char *unique = name;   /* "name", else "name_2", "name_3", ... */
    for (int k = 2; st_fields_find(&r->fields, unique) >= 0; k++) {
        if (unique != name)
            st_free(unique);
        if (!(unique = st_strdup_printf("%s_%d", name, k))) {
            st_free(name);
            return ST_ERR_NOMEM;
        }
    }
    st_status rc = st_fields_add(&r->fields, unique,
                                 field_type_of(s->dbf_types[j], decimals),
                                 s->dbf_types[j] == 'D' ? 10 : width, decimals, NULL);
    if (unique != name)
        st_free(unique);
    st_free(name);
    return rc;
}

static st_status read_fields(st_reader *r, shp_reader *s)
{
    s->nfields = DBFGetFieldCount(s->dbf);
    if (s->nfields < 0 || s->nfields > ST_SHP_MAX_FIELDS)
        return fail_file(r, s->dbf_path, ST_ERR_LIMIT, -1,
                         "%d fields; the limit is %d", s->nfields, ST_SHP_MAX_FIELDS);
    s->dbf_types = st_malloc((size_t)s->nfields + 1);
    if (!s->dbf_types)
        return ST_ERR_NOMEM;
    for (int j = 0; j < s->nfields; j++) {
        st_status rc = add_field(r, s, j);
        if (rc != ST_OK)
            return rc;
    }
    return ST_OK;
}

static st_status read_projection(st_reader *r, const char *stem)
{
    int found;
    char *prj = sidecar_path(stem, ".prj", &found);
    if (!prj)
        return ST_ERR_NOMEM;
    st_status rc = found ? read_sidecar_text(r, prj, &r->crs_def) : ST_OK;
    st_free(prj);
    if (rc == ST_OK && r->crs_def && !r->crs_def[0]) {
        st_free(r->crs_def);   /* an empty .prj says nothing */
        r->crs_def = NULL;
    }
    return rc;
}

static st_status shp_open(st_reader *r)
{
    shp_reader *s = st_calloc(1, sizeof *s);
    if (!s)
        return ST_ERR_NOMEM;
    s->cd = (iconv_t)-1;
    hooks_init(&s->hooks);
    r->impl = s;
    r->schema_fixed = 1;
    char *stem = path_without_ext(r->path);
    if (!stem)
        return ST_ERR_NOMEM;
    st_status rc = open_shapes(r, s, stem);
    if (rc == ST_OK)
        rc = open_table(r, s, stem);
    if (rc == ST_OK)
        rc = setup_encoding(r, s, stem);
    if (rc == ST_OK)
        rc = read_fields(r, s);
    if (rc == ST_OK)
        rc = read_projection(r, stem);
    st_free(stem);
    return rc;
}

/* ---- reader: geometry ------------------------------------------------- */

static st_status shape_fail(st_reader *r, st_status code, int rec, const char *what)
{
    return st_reader_fail(r, code, (long long)r->next_index, "record %d: %s", rec + 1, what);
}

/* Number of parts to walk: Shapelib may give 0 parts for a shape whose
** vertices then form one part. */
static int part_count(const SHPObject *o)
{
    return o->nParts > 0 ? o->nParts : (o->nVertices > 0 ? 1 : 0);
}

/* Vertex range of part k, checked against the vertex count and order. */
static int part_range(const SHPObject *o, int k, uint32_t *first, uint32_t *count)
{
    if (o->nParts == 0) {
        *first = 0;
        *count = (uint32_t)o->nVertices;
        return 1;
    }
    int a = o->panPartStart[k];
    int b = k + 1 < o->nParts ? o->panPartStart[k + 1] : o->nVertices;
    if (a < 0 || b < a || b > o->nVertices)
        return 0;
    *first = (uint32_t)a;
    *count = (uint32_t)(b - a);
    return 1;
}

static st_status add_vertices(st_geom *g, const SHPObject *o, uint32_t first, uint32_t n)
{
    for (uint32_t i = first; i < first + n; i++) {
        st_status rc = st_geom_add_xy(g, o->padfX[i], o->padfY[i]);
        if (rc != ST_OK)
            return rc;
    }
    return ST_OK;
}

/* 1 if (px,py) is inside the ring, 0 outside, -1 on its boundary
** (crossing-number test; the ring is closed implicitly). */
static int point_in_ring(const double *xs, const double *ys, uint32_t n,
                         double px, double py)
{
    int inside = 0;
    for (uint32_t i = 0, j = n - 1; i < n; j = i++) {
        double xi = xs[i], yi = ys[i], xj = xs[j], yj = ys[j];
        if ((px - xi) * (yj - yi) == (py - yi) * (xj - xi) &&
            px >= fmin(xi, xj) && px <= fmax(xi, xj) &&
            py >= fmin(yi, yj) && py <= fmax(yi, yj))
            return -1;
        if ((yi > py) != (yj > py) &&
            px < xi + (py - yi) * (xj - xi) / (yj - yi))
            inside = !inside;
    }
    return inside;
}

/* 1 if the shell ring contains the hole ring: decided by the first hole
** vertex not on the shell's boundary (all on it: contained). */
static int ring_contains(const SHPObject *o, const ring_info *shell, const ring_info *hole)
{
    if (hole->box[0] < shell->box[0] || hole->box[1] < shell->box[1] ||
        hole->box[2] > shell->box[2] || hole->box[3] > shell->box[3])
        return 0;
    for (uint32_t v = hole->first; v < hole->first + hole->count; v++) {
        int at = point_in_ring(o->padfX + shell->first, o->padfY + shell->first,
                               shell->count, o->padfX[v], o->padfY[v]);
        if (at >= 0)
            return at;
    }
    return 1;
}

/* Measure ring k: signed area (shoelace about its first vertex, for
** precision far from 0,0) and bounding box. */
static void measure_ring(const SHPObject *o, ring_info *ri)
{
    const double *x = o->padfX + ri->first, *y = o->padfY + ri->first;
    double s = 0.0;
    ri->box[0] = ri->box[2] = x[0];
    ri->box[1] = ri->box[3] = y[0];
    for (uint32_t i = 1; i < ri->count; i++) {
        if (i + 1 < ri->count)
            s += (x[i] - x[0]) * (y[i + 1] - y[0]) - (x[i + 1] - x[0]) * (y[i] - y[0]);
        ri->box[0] = fmin(ri->box[0], x[i]);
        ri->box[1] = fmin(ri->box[1], y[i]);
        ri->box[2] = fmax(ri->box[2], x[i]);
        ri->box[3] = fmax(ri->box[3], y[i]);
    }
    ri->area = s / 2.0;
    ri->is_hole = ri->area > 0.0;   /* counter-clockwise; zero area: a shell */
    ri->shell = -1;
    ri->first_hole = ri->last_hole = ri->next_hole = -1;
}

/* Collect the non-empty rings of a polygon record into s->rings. */
static st_status collect_rings(st_reader *r, shp_reader *s, const SHPObject *o,
                               int rec, uint32_t *nrings)
{
    int nparts = part_count(o);
    if ((uint32_t)nparts > s->cap_rings) {
        ring_info *p = st_realloc(s->rings, (size_t)nparts * sizeof *p);
        if (!p)
            return ST_ERR_NOMEM;
        s->rings = p;
        s->cap_rings = (uint32_t)nparts;
    }
    uint32_t n = 0;
    for (int k = 0; k < nparts; k++) {
        ring_info *ri = &s->rings[n];
        if (!part_range(o, k, &ri->first, &ri->count))
            return shape_fail(r, ST_ERR_FORMAT, rec, "a part starts outside the "
                              "shape's vertices or before the previous part");
        if (ri->count == 0)
            continue;   /* an empty ring holds no data */
        measure_ring(o, ri);
        n++;
    }
    *nrings = n;
    return ST_OK;
}

/* Give each hole to the smallest shell that contains it; chain the holes
** of each shell in file order. */
static void match_holes(const SHPObject *o, ring_info *rings, uint32_t n)
{
    for (uint32_t h = 0; h < n; h++) {
        if (!rings[h].is_hole)
            continue;
        double best = INFINITY;
        for (uint32_t k = 0; k < n; k++)
            if (!rings[k].is_hole && fabs(rings[k].area) < best &&
                ring_contains(o, &rings[k], &rings[h])) {
                best = fabs(rings[k].area);
                rings[h].shell = (int32_t)k;
            }
        ring_info *sh = rings[h].shell >= 0 ? &rings[rings[h].shell] : NULL;
        if (!sh)
            continue;
        if (sh->last_hole >= 0)
            rings[sh->last_hole].next_hole = (int32_t)h;
        else
            sh->first_hole = (int32_t)h;
        sh->last_hole = (int32_t)h;
    }
}

static st_status read_polygons(st_reader *r, shp_reader *s, const SHPObject *o,
                               int rec, st_geom *g)
{
    uint32_t n = 0;
    st_status rc = collect_rings(r, s, o, rec, &n);
    if (rc != ST_OK)
        return rc;
    match_holes(o, s->rings, n);
    /* A part per shell and per hole without a shell, in file order. */
    for (uint32_t k = 0; k < n && rc == ST_OK; k++) {
        const ring_info *ri = &s->rings[k];
        if (ri->is_hole && ri->shell >= 0)
            continue;
        rc = st_geom_begin_part(g);
        if (rc == ST_OK)
            rc = st_geom_begin_ring(g);
        if (rc == ST_OK)
            rc = add_vertices(g, o, ri->first, ri->count);
        for (int32_t h = ri->first_hole; h >= 0 && rc == ST_OK; h = s->rings[h].next_hole) {
            rc = st_geom_begin_ring(g);
            if (rc == ST_OK)
                rc = add_vertices(g, o, s->rings[h].first, s->rings[h].count);
        }
    }
    g->type = g->nparts > 1 ? ST_GEOM_MULTIPOLYGON : ST_GEOM_POLYGON;
    return rc;
}

/* Points and multipoints: each point a part with a one-coordinate ring. */
static st_status read_points(const SHPObject *o, st_geom_type type, st_geom *g)
{
    g->type = type;
    int n = type == ST_GEOM_POINT && o->nVertices > 1 ? 1 : o->nVertices;
    for (int i = 0; i < n; i++) {
        st_status rc = st_geom_begin_part(g);
        if (rc == ST_OK)
            rc = st_geom_begin_ring(g);
        if (rc == ST_OK)
            rc = st_geom_add_xy(g, o->padfX[i], o->padfY[i]);
        if (rc != ST_OK)
            return rc;
    }
    return ST_OK;
}

static st_status read_lines(st_reader *r, const SHPObject *o, int rec, st_geom *g)
{
    int nparts = part_count(o);
    for (int k = 0; k < nparts; k++) {
        uint32_t first, count;
        if (!part_range(o, k, &first, &count))
            return shape_fail(r, ST_ERR_FORMAT, rec, "a part starts outside the "
                              "shape's vertices or before the previous part");
        st_status rc = st_geom_begin_part(g);
        if (rc == ST_OK)
            rc = st_geom_begin_ring(g);
        if (rc == ST_OK)
            rc = add_vertices(g, o, first, count);
        if (rc != ST_OK)
            return rc;
    }
    g->type = g->nparts > 1 ? ST_GEOM_MULTILINESTRING : ST_GEOM_LINESTRING;
    return ST_OK;
}

static st_status shape_to_geom(st_reader *r, shp_reader *s, const SHPObject *o,
                               int rec, st_geom *g)
{
    char what[160];
    if (o->nVertices < 0 || o->nParts < 0 ||
        (o->nVertices > 0 && (!o->padfX || !o->padfY)) ||
        (o->nParts > 0 && !o->panPartStart))
        return shape_fail(r, ST_ERR_FORMAT, rec, "negative or missing part or vertex list");
    if (o->nVertices > ST_SHP_MAX_VERTICES || o->nParts > ST_SHP_MAX_PARTS) {
        snprintf(what, sizeof what, "%d vertices in %d parts; the limits are %d "
                 "vertices and %d parts per shape", o->nVertices, o->nParts,
                 ST_SHP_MAX_VERTICES, ST_SHP_MAX_PARTS);
        return shape_fail(r, ST_ERR_LIMIT, rec, what);
    }
    int t = o->nSHPType;
    g->has_z = t == SHPT_POINTZ || t == SHPT_ARCZ || t == SHPT_POLYGONZ ||
               t == SHPT_MULTIPOINTZ;
    g->has_m = t == SHPT_POINTM || t == SHPT_ARCM || t == SHPT_POLYGONM ||
               t == SHPT_MULTIPOINTM || (g->has_z && o->bMeasureIsUsed);
    switch (t) {
    case SHPT_NULL:
        g->type = ST_GEOM_NULL;
        g->has_z = g->has_m = 0;
        return ST_OK;
    case SHPT_POLYGON: case SHPT_POLYGONZ: case SHPT_POLYGONM:
        return read_polygons(r, s, o, rec, g);
    case SHPT_POINT: case SHPT_POINTZ: case SHPT_POINTM:
        return read_points(o, ST_GEOM_POINT, g);
    case SHPT_MULTIPOINT: case SHPT_MULTIPOINTZ: case SHPT_MULTIPOINTM:
        return read_points(o, ST_GEOM_MULTIPOINT, g);
    case SHPT_ARC: case SHPT_ARCZ: case SHPT_ARCM:
        return read_lines(r, o, rec, g);
    }
    snprintf(what, sizeof what, "shape type %s (%d) is not supported",
             shape_type_name(t), t);
    return shape_fail(r, ST_ERR_FORMAT, rec, what);
}

static st_status read_geometry(st_reader *r, shp_reader *s, int rec, st_geom *g)
{
    capture_begin();
    SHPObject *o = SHPReadObject(s->shp, rec);
    if (!o)
        return st_reader_fail(r, ST_ERR_FORMAT, (long long)r->next_index,
                              "record %d: Shapelib cannot read the shape: %s",
                              rec + 1, capture_text("corrupt record"));
    st_status rc = shape_to_geom(r, s, o, rec, g);
    SHPDestroyObject(o);
    if (rc != ST_OK)
        st_geom_clear(g);
    return rc;
}

/* ---- reader: attributes ------------------------------------------------ */

/* Shortest of %.15g, %.16g, %.17g that reads back as v, so a value that
** goes through text and back compares equal. Returns owned text. */
static char *format_real(double v)
{
    char buf[40];
    for (int p = 15; p <= 17; p++) {
        snprintf(buf, sizeof buf, "%.*g", p, v);
        if (strtod(buf, NULL) == v)
            break;
    }
    return st_strdup(buf);
}

/* Normalised text of a numeric value t[0..n) (trimmed): integers as
** "%lld", reals as format_real; text that is not a number stays as it is
** (decoded), so nothing is lost. Returns owned text or NULL (no memory). */
static char *normalise_number(shp_reader *s, const char *t, size_t n, st_field_type type)
{
    char buf[64];
    if (n > 0 && n < sizeof buf) {
        memcpy(buf, t, n);
        buf[n] = '\0';
        char *end = NULL;
        errno = 0;
        if (type == ST_FIELD_INTEGER) {
            long long v = strtoll(buf, &end, 10);
            if (errno == 0 && *end == '\0')
                return st_strdup_printf("%lld", v);
        } else {
            double v = strtod(buf, &end);
            if (errno == 0 && *end == '\0' && isfinite(v))
                return format_real(v);
        }
    }
    return decode_text(s, t, n);
}

/* "YYYYMMDD" -> "YYYY-MM-DD"; anything else stays as it is (decoded). */
static char *normalise_date(shp_reader *s, const char *t, size_t n)
{
    if (n == 8 && strspn(t, "0123456789") == 8)
        return st_strdup_printf("%.4s-%.2s-%.2s", t, t + 4, t + 6);
    return decode_text(s, t, n);
}

static st_status read_value(st_reader *r, shp_reader *s, int rec, int j, st_feature *f)
{
    /* Both calls below read the field into the same Shapelib buffer, so the
    ** null test comes first; Shapelib says "null" when the read fails,
    ** which the capture tells apart. */
    capture_begin();
    int is_null = DBFIsAttributeNULL(s->dbf, rec, j);
    const char *raw = capture.failed || is_null ? NULL : DBFReadStringAttribute(s->dbf, rec, j);
    if (capture.failed || (!is_null && !raw))
        return fail_file(r, s->dbf_path, ST_ERR_FORMAT, (long long)r->next_index,
                         "record %d: field '%s' cannot be read: %s", rec + 1,
                         r->fields.items[j].name, capture_text("unknown reason"));
    if (is_null)
        return ST_OK;
    size_t n = strlen(raw);
    if (n > ST_SHP_MAX_VALUE)
        return fail_file(r, s->dbf_path, ST_ERR_LIMIT, (long long)r->next_index,
                         "record %d: field '%s' holds %zu bytes; the limit is %d",
                         rec + 1, r->fields.items[j].name, n, ST_SHP_MAX_VALUE);
    /* Trim (Shapelib already does for most builds; this does not rely on it). */
    while (n > 0 && (raw[0] == ' ' || raw[0] == '\t')) {
        raw++;
        n--;
    }
    while (n > 0 && (raw[n - 1] == ' ' || raw[n - 1] == '\t'))
        n--;
    char *v = NULL;
    switch (s->dbf_types[j]) {
    case 'N': case 'F':
        v = normalise_number(s, raw, n, r->fields.items[j].type);
        break;
    case 'L':
        if (n > 0 && strchr("TtYy", raw[0]))
            v = st_strdup("true");
        else if (n > 0 && strchr("FfNn", raw[0]))
            v = st_strdup("false");
        else
            return ST_OK;   /* '?' or junk: unknown */
        break;
    case 'D':
        v = normalise_date(s, raw, n);
        break;
    default:
        v = decode_text(s, raw, n);
    }
    if (!v)
        return ST_ERR_NOMEM;
    f->values[j] = v;
    return ST_OK;
}

static st_status read_attributes(st_reader *r, shp_reader *s, int rec, st_feature *f)
{
    if (s->nfields == 0)
        return ST_OK;
    f->values = st_calloc((size_t)s->nfields, sizeof *f->values);
    if (!f->values)
        return ST_ERR_NOMEM;
    f->nvalues = (uint32_t)s->nfields;
    for (int j = 0; j < s->nfields; j++) {
        st_status rc = read_value(r, s, rec, j, f);
        if (rc != ST_OK)
            return rc;
    }
    return ST_OK;
}

static st_status shp_next(st_reader *r, st_feature **out)
{
    shp_reader *s = r->impl;
    *out = NULL;
    while (s->next < s->nrec && DBFIsRecordDeleted(s->dbf, s->next))
        s->next++;   /* a deleted record is not part of the layer (dBASE) */
    if (s->next >= s->nrec) {
        r->bytes_done = r->bytes_total;
        return ST_OK;
    }
    int rec = s->next++;
    st_feature *f = st_feature_new();
    if (!f)
        return ST_ERR_NOMEM;
    st_status rc = (f->source_id = st_strdup_printf("%d", rec + 1)) ? ST_OK : ST_ERR_NOMEM;
    if (rc == ST_OK)
        rc = read_geometry(r, s, rec, &f->geom);
    if (rc == ST_OK)
        rc = read_attributes(r, s, rec, f);
    if (rc != ST_OK) {
        st_feature_free(f);
        return rc;
    }
    r->bytes_done = (long long)s->shp->panRecOffset[rec] + 8 + s->shp->panRecSize[rec];
    *out = f;
    return ST_OK;
}

static void shp_close(st_reader *r)
{
    shp_reader *s = r->impl;
    if (!s)
        return;
    capture_begin();
    if (s->shp)
        SHPClose(s->shp);
    if (s->dbf)
        DBFClose(s->dbf);
    if (s->cd != (iconv_t)-1)
        iconv_close(s->cd);
    st_free(s->dbf_path);
    st_free(s->dbf_types);
    st_free(s->conv);
    st_free(s->rings);
    st_free(s);
    r->impl = NULL;
}

const st_reader_format st_shp_reader_format = {
    "shapefile", shp_probe, shp_open, shp_next, shp_close,
};

/* ---- writer ------------------------------------------------------------ */

#define ST_SHP_TEXT_WIDTH 254    /* widest standard dBASE character field */
#define ST_SHP_INT_WIDTH 18      /* N(18,0): every 18-character integer */
#define ST_SHP_REAL_WIDTH 24     /* N(24,15) */
#define ST_SHP_REAL_DECIMALS 15

/* WGS 84 geographic in the ESRI flavour of WKT (REFERENCES.md §6). */
static const char prj_wgs84[] =
    "GEOGCS[\"GCS_WGS_1984\",DATUM[\"D_WGS_1984\",SPHEROID[\"WGS_1984\","
    "6378137.0,298.257223563]],PRIMEM[\"Greenwich\",0.0],"
    "UNIT[\"Degree\",0.0174532925199433]]";

/* The five files of a written shapefile, in commit order: the .shp last,
** so that it appears only once its sidecars are in place. */
static const char *const out_parts[] = {".shx", ".dbf", ".prj", ".cpg", ".shp"};
#define OUT_NPARTS 5

typedef struct out_field {
    char name[XBASE_FLDNAME_LEN_WRITE + 1];   /* as written */
    const char *long_name;     /* the layer's name, borrowed from the copy */
    st_field_type type;
    char dbf_type;             /* 'C', 'N' or 'L' */
    int width, decimals;
    unsigned long cut;         /* text values cut to the width */
    unsigned long unfit;       /* values not of the field's type: left empty */
} out_field;

typedef struct shp_writer {
    SAHooks hooks;             /* copied into the handles by Shapelib */
    SHPHandle shp;
    DBFHandle dbf;
    int shp_type;
    st_fields names;           /* copy of the layer's fields, owned */
    out_field *fields;         /* as written, owned */
    uint32_t nfields;
    int record_field;          /* 1: a record-number field was added */
    int nrec;
    long long shp_bytes, dbf_bytes, dbf_record;
    st_geom work;              /* oriented copy of a polygon, owned */
    int *starts;               /* Shapelib's arrays for one shape, owned */
    double *xs, *ys;
    uint32_t cap_starts, cap_xy;
    char *text;                /* a text value cut to its width, owned */
    size_t cap_text;
} shp_writer;

/* Error about the output at record 'index' (-1: none). */
static st_status wfail(st_writer *w, st_status code, long long index,
                       const char *fmt, ...) ST_PRINTF(4, 5);
static st_status wfail(st_writer *w, st_status code, long long index,
                       const char *fmt, ...)
{
    st_loc loc = ST_LOC_FEATURE(w->path, index);
    va_list ap;
    va_start(ap, fmt);
    st_diags_addv(w->diags, ST_SEV_ERROR, code, &loc, fmt, ap);
    va_end(ap);
    return code;
}

static void writer_free(shp_writer *s)
{
    if (!s)
        return;
    capture_begin();
    if (s->shp)
        SHPClose(s->shp);
    if (s->dbf)
        DBFClose(s->dbf);
    st_fields_free(&s->names);
    st_free(s->fields);
    st_geom_clear(&s->work);
    st_free(s->starts);
    st_free(s->xs);
    st_free(s->ys);
    st_free(s->text);
    st_free(s);
}

static st_status shp_wopen(st_writer *w)
{
    shp_writer *s = st_calloc(1, sizeof *s);
    if (!s)
        return ST_ERR_NOMEM;
    hooks_init(&s->hooks);
    st_fields_init(&s->names);
    st_geom_init(&s->work);
    w->impl = s;
    return ST_OK;
}

/* Shapefile shape type for a layer's declared geometry type, or -1. */
static int shape_type_for(st_geom_type t)
{
    switch (t) {
    case ST_GEOM_POLYGON: case ST_GEOM_MULTIPOLYGON: case ST_GEOM_COLLECTION:
        return SHPT_POLYGON;
    case ST_GEOM_LINESTRING: case ST_GEOM_MULTILINESTRING:
        return SHPT_ARC;
    case ST_GEOM_POINT:
        return SHPT_POINT;
    case ST_GEOM_MULTIPOINT:
        return SHPT_MULTIPOINT;
    case ST_GEOM_NULL:
        return SHPT_NULL;
    case ST_GEOM_OTHER:
        break;
    }
    return -1;
}

/* 1 if a feature geometry of type t may go into a file of shape type st. */
static int geom_fits(int st, st_geom_type t)
{
    switch (st) {
    case SHPT_POLYGON:
        return t == ST_GEOM_POLYGON || t == ST_GEOM_MULTIPOLYGON || t == ST_GEOM_COLLECTION;
    case SHPT_ARC:
        return t == ST_GEOM_LINESTRING || t == ST_GEOM_MULTILINESTRING;
    case SHPT_POINT:
        return t == ST_GEOM_POINT;
    case SHPT_MULTIPOINT:
        return t == ST_GEOM_POINT || t == ST_GEOM_MULTIPOINT;
    }
    return 0;
}

/* Byte length of the longest prefix of s, at most max bytes, that does not
** end inside a UTF-8 sequence. */
static size_t utf8_cut(const char *s, size_t max)
{
    size_t n = strlen(s);
    if (n <= max)
        return n;
    n = max;
    while (n > 0 && ((unsigned char)s[n] & 0xC0) == 0x80)
        n--;
    return n;
}

/* 1 if 'name' is already given to a field (dBASE readers compare field
** names without case, so neither do we). */
static int name_taken(const shp_writer *s, const char *name)
{
    for (uint32_t i = 0; i < s->nfields; i++)
        if (s->fields[i].name[0] && strcasecmp(s->fields[i].name, name) == 0)
            return 1;
    return 0;
}

/*
** Field names of at most 10 bytes (dBASE). Names that fit and are free
** keep them, first come first served. The rest are cut at a character
** boundary and, while the result is taken, cut shorter and numbered "~1",
** "~2", ... Each change is one "long -> short" line in the notes.
*/
static st_status plan_names(st_writer *w, shp_writer *s)
{
    for (uint32_t i = 0; i < s->nfields; i++) {
        const char *nm = s->fields[i].long_name;
        size_t len = strlen(nm);
        if (len >= 1 && len <= XBASE_FLDNAME_LEN_WRITE && !name_taken(s, nm))
            memcpy(s->fields[i].name, nm, len + 1);
    }
    for (uint32_t i = 0; i < s->nfields; i++) {
        out_field *o = &s->fields[i];
        if (o->name[0])
            continue;
        const char *nm = o->long_name[0] ? o->long_name : "field";
        char cand[XBASE_FLDNAME_LEN_WRITE + 1];
        size_t k = utf8_cut(nm, XBASE_FLDNAME_LEN_WRITE);
        snprintf(cand, sizeof cand, "%.*s", (int)k, nm);
        for (unsigned long num = 1; name_taken(s, cand); num++) {
            char suffix[24];
            snprintf(suffix, sizeof suffix, "~%lu", num);
            size_t sn = strlen(suffix);   /* at most "~2047": fields are capped */
            k = utf8_cut(nm, XBASE_FLDNAME_LEN_WRITE - sn);
            memcpy(cand, nm, k);
            memcpy(cand + k, suffix, sn + 1);
        }
        memcpy(o->name, cand, sizeof cand);
        st_status rc = st_buf_printf(&w->notes, "%s -> %s\n", o->long_name, o->name);
        if (rc != ST_OK)
            return rc;
    }
    return ST_OK;
}

static void plan_type(out_field *o, const st_field *f)
{
    o->type = f->type;
    switch (f->type) {
    case ST_FIELD_INTEGER:
        o->dbf_type = 'N';
        o->width = ST_SHP_INT_WIDTH;
        break;
    case ST_FIELD_REAL:
        o->dbf_type = 'N';
        o->width = ST_SHP_REAL_WIDTH;
        o->decimals = ST_SHP_REAL_DECIMALS;
        break;
    case ST_FIELD_BOOLEAN:
        o->dbf_type = 'L';
        o->width = 1;
        break;
    case ST_FIELD_TEXT: case ST_FIELD_JSON:
        o->dbf_type = 'C';
        o->width = f->width > 0 && f->width < ST_SHP_TEXT_WIDTH ? f->width
                                                                : ST_SHP_TEXT_WIDTH;
        break;
    }
}

static st_status plan_fields(st_writer *w, shp_writer *s, const st_fields *fields)
{
    if (fields->count > ST_SHP_MAX_FIELDS)
        return wfail(w, ST_ERR_LIMIT, -1, "%u fields; a dBASE table holds at most %d",
                     fields->count, ST_SHP_MAX_FIELDS);
    st_status rc = st_fields_copy(&s->names, fields);
    if (rc != ST_OK)
        return rc;
    s->nfields = fields->count ? fields->count : 1;
    s->fields = st_calloc(s->nfields, sizeof *s->fields);
    if (!s->fields)
        return ST_ERR_NOMEM;
    if (fields->count == 0) {
        /* dBASE needs a field, and Shapelib adds records only through one. */
        s->record_field = 1;
        s->fields[0] = (out_field){"record", "record", ST_FIELD_INTEGER, 'N', 10, 0, 0, 0};
        rc = st_buf_puts(&w->notes, "(no attributes) -> record: a dBASE table needs "
                                    "a field, so the record number was added\n");
    } else {
        for (uint32_t i = 0; i < s->nfields; i++) {
            s->fields[i].long_name = s->names.items[i].name;
            plan_type(&s->fields[i], &s->names.items[i]);
        }
        rc = plan_names(w, s);
    }
    s->dbf_record = 1;
    for (uint32_t i = 0; i < s->nfields; i++)
        s->dbf_record += s->fields[i].width;
    if (rc == ST_OK && s->dbf_record > 65535)
        rc = wfail(w, ST_ERR_LIMIT, -1, "the fields need %lld bytes a record; a dBASE "
                   "record holds at most 65535", s->dbf_record);
    s->dbf_bytes = 32 + 32LL * s->nfields + 1 + 1;   /* header, terminator, EOF */
    return rc;
}

/* Write 'text' to the file 'stem''ext', checking every step. */
static st_status write_small_file(st_writer *w, const char *stem, const char *ext,
                                  const char *text)
{
    char *path = st_strdup_printf("%s%s", stem, ext);
    if (!path)
        return ST_ERR_NOMEM;
    st_status rc = ST_OK;
    FILE *fp = fopen(path, "wb");
    if (!fp) {
        rc = wfail(w, ST_ERR_IO, -1, "cannot create %s: %s", path, strerror(errno));
    } else {
        size_t n = strlen(text);
        int bad = fwrite(text, 1, n, fp) != n;
        bad |= fclose(fp) != 0;
        if (bad)
            rc = wfail(w, ST_ERR_IO, -1, "cannot write %s: %s", path, strerror(errno));
    }
    st_free(path);
    return rc;
}

/* Create the temporary .shp/.shx/.dbf (Shapelib) and .prj/.cpg (here). */
static st_status create_files(st_writer *w, shp_writer *s)
{
    capture_begin();
    s->shp = SHPCreateLL(w->tmp_path, s->shp_type, &s->hooks);
    if (s->shp)
        s->dbf = DBFCreateLL(w->tmp_path, NULL, &s->hooks);
    if (!s->shp || !s->dbf)
        return wfail(w, ST_ERR_IO, -1, "cannot create the temporary files: %s",
                     capture_text(strerror(errno)));
    for (uint32_t i = 0; i < s->nfields; i++) {
        const out_field *o = &s->fields[i];
        if (DBFAddNativeFieldType(s->dbf, o->name, o->dbf_type, o->width, o->decimals) < 0)
            return wfail(w, ST_ERR_IO, -1, "cannot add field '%s': %s", o->name,
                         capture_text("refused by Shapelib"));
    }
    if (capture.failed)
        return wfail(w, ST_ERR_IO, -1, "cannot write the temporary files: %s",
                     capture_text(""));
    char *stem = path_without_ext(w->tmp_path);
    if (!stem)
        return ST_ERR_NOMEM;
    st_status rc = write_small_file(w, stem, ".prj", prj_wgs84);
    if (rc == ST_OK)
        rc = write_small_file(w, stem, ".cpg", "UTF-8");
    st_free(stem);
    return rc;
}

static st_status shp_begin(st_writer *w, const char *name, const st_fields *fields,
                           st_geom_type type)
{
    (void)name;   /* a shapefile's layer name is its file name */
    shp_writer *s = w->impl;
    s->shp_type = shape_type_for(type);
    if (s->shp_type < 0)
        return wfail(w, ST_ERR_USAGE, -1, "a shapefile cannot hold %s geometries",
                     st_geom_type_name(type));
    s->shp_bytes = 100;
    st_status rc = plan_fields(w, s, fields);
    if (rc == ST_OK)
        rc = create_files(w, s);
    return rc;
}

/* Make room for one shape's Shapelib arrays. */
static st_status reserve_arrays(shp_writer *s, uint32_t nparts, uint32_t ncoords)
{
    if (nparts > s->cap_starts) {
        int *p = st_realloc(s->starts, (size_t)nparts * sizeof *p);
        if (!p)
            return ST_ERR_NOMEM;
        s->starts = p;
        s->cap_starts = nparts;
    }
    if (ncoords > s->cap_xy) {
        double *x = st_realloc(s->xs, (size_t)ncoords * sizeof *x);
        if (!x)
            return ST_ERR_NOMEM;
        s->xs = x;
        double *y = st_realloc(s->ys, (size_t)ncoords * sizeof *y);
        if (!y)
            return ST_ERR_NOMEM;
        s->ys = y;
        s->cap_xy = ncoords;
    }
    return ST_OK;
}

/* Fill s->xs/ys with all coordinates of g and s->starts with the start of
** each non-empty ring (Shapelib rejects a part that starts where the
** previous one does). Returns the number of parts. */
static int fill_arrays(shp_writer *s, const st_geom *g)
{
    for (uint32_t i = 0; i < g->ncoords; i++) {
        s->xs[i] = g->xy[2 * i];
        s->ys[i] = g->xy[2 * i + 1];
    }
    int nparts = 0;
    for (uint32_t r = 0; r < g->nrings; r++)
        if (g->ring_coord[r + 1] > g->ring_coord[r])
            s->starts[nparts++] = (int)g->ring_coord[r];
    return nparts;
}

/* Build the Shapelib object for one feature and its size in the .shp. */
static st_status make_shape(st_writer *w, shp_writer *s, const st_geom *g,
                            SHPObject **out, long long *bytes)
{
    *out = NULL;
    if (s->shp_type == SHPT_NULL || g->type == ST_GEOM_NULL || g->ncoords == 0) {
        *bytes = 8 + 4;
        *out = SHPCreateObject(SHPT_NULL, -1, 0, NULL, NULL, 0, NULL, NULL, NULL, NULL);
        return *out ? ST_OK : ST_ERR_NOMEM;
    }
    if (!geom_fits(s->shp_type, g->type))
        return wfail(w, ST_ERR_USAGE, s->nrec, "a %s cannot go into a shapefile of %s "
                     "shapes", st_geom_type_name(g->type), SHPTypeName(s->shp_type));
    if (g->ncoords > ST_SHP_MAX_VERTICES || g->nrings > ST_SHP_MAX_PARTS)
        return wfail(w, ST_ERR_LIMIT, s->nrec, "%u vertices in %u rings; the limits "
                     "are %d vertices and %d parts per shape", g->ncoords, g->nrings,
                     ST_SHP_MAX_VERTICES, ST_SHP_MAX_PARTS);
    if (s->shp_type == SHPT_POLYGON) {
        st_status rc = st_geom_copy(&s->work, g);
        if (rc != ST_OK)
            return rc;
        st_geom_orient(&s->work, 0);   /* shells clockwise, holes counter-clockwise */
        g = &s->work;
    }
    st_status rc = reserve_arrays(s, g->nrings, g->ncoords);
    if (rc != ST_OK)
        return rc;
    int nparts = fill_arrays(s, g);
    int nverts = (int)g->ncoords;
    switch (s->shp_type) {
    case SHPT_POINT:
        nparts = 0;
        nverts = 1;
        *bytes = 8 + 20;
        break;
    case SHPT_MULTIPOINT:
        nparts = 0;
        *bytes = 8 + 40 + 16LL * nverts;
        break;
    default:
        *bytes = 8 + 44 + 4LL * nparts + 16LL * nverts;
    }
    *out = SHPCreateObject(s->shp_type, -1, nparts, nparts ? s->starts : NULL, NULL,
                           nverts, s->xs, s->ys, NULL, NULL);
    return *out ? ST_OK : ST_ERR_NOMEM;
}

/* Integer text for an N(18,0) field, right-aligned; 0 if v is not an
** integer of at most 18 characters. */
static int format_integer(const char *v, char *buf, size_t n)
{
    char *end = NULL;
    errno = 0;
    long long i = strtoll(v, &end, 10);
    if (errno || end == v || *end) {
        double d = strtod(v, &end);   /* "3.0" is an integer too */
        if (end == v || *end || !isfinite(d) || d != floor(d) || fabs(d) >= 1e17)
            return 0;
        i = (long long)d;
    }
    int len = snprintf(buf, n, "%*lld", ST_SHP_INT_WIDTH, i);
    return len == ST_SHP_INT_WIDTH;
}

/* Real text for an N(24,15) field, right-aligned: plain decimals when some
** count of them (0..15) reads back as the same double and fits, else the
** shortest %g form (at most 24 characters); 0 if v is not a finite number. */
static int format_real_field(const char *v, char *buf, size_t n)
{
    char *end = NULL;
    double d = strtod(v, &end);
    if (end == v || *end || !isfinite(d))
        return 0;
    char text[64];
    int found = 0;
    for (int dec = 0; dec <= ST_SHP_REAL_DECIMALS && !found; dec++) {
        int len = snprintf(text, sizeof text, "%.*f", dec, d);
        found = len > 0 && len <= ST_SHP_REAL_WIDTH && strtod(text, NULL) == d;
    }
    if (!found) {
        char *g = format_real(d);
        if (!g)
            return -1;
        snprintf(text, sizeof text, "%s", g);
        st_free(g);
    }
    return snprintf(buf, n, "%*s", ST_SHP_REAL_WIDTH, text) == ST_SHP_REAL_WIDTH;
}

/* 1 true, 0 false, -1 neither. */
static int parse_bool(const char *v)
{
    static const char *const yes[] = {"true", "t", "yes", "y", "1"};
    static const char *const no[] = {"false", "f", "no", "n", "0"};
    for (size_t i = 0; i < sizeof yes / sizeof yes[0]; i++) {
        if (strcasecmp(v, yes[i]) == 0)
            return 1;
        if (strcasecmp(v, no[i]) == 0)
            return 0;
    }
    return -1;
}

/* Text value cut to the field width at a character boundary (counted). */
static st_status write_text(shp_writer *s, out_field *o, int k, const char *v, int *ok)
{
    size_t n = utf8_cut(v, (size_t)o->width);
    if (v[n] != '\0') {
        o->cut++;
        if (n + 1 > s->cap_text) {
            char *t = st_realloc(s->text, n + 1);
            if (!t)
                return ST_ERR_NOMEM;
            s->text = t;
            s->cap_text = n + 1;
        }
        memcpy(s->text, v, n);
        s->text[n] = '\0';
        v = s->text;
    }
    *ok = DBFWriteStringAttribute(s->dbf, s->nrec, k, v);
    return ST_OK;
}

/* Write value v (NULL: missing) of field k; *ok is Shapelib's result. */
static st_status write_value(shp_writer *s, int k, const char *v, int *ok)
{
    out_field *o = &s->fields[k];
    char buf[64];
    int fits;
    if (v) {
        switch (o->dbf_type) {
        case 'C':
            return write_text(s, o, k, v, ok);
        case 'N':
            fits = o->type == ST_FIELD_INTEGER ? format_integer(v, buf, sizeof buf)
                                               : format_real_field(v, buf, sizeof buf);
            if (fits < 0)
                return ST_ERR_NOMEM;
            if (fits) {
                *ok = DBFWriteAttributeDirectly(s->dbf, s->nrec, k, buf);
                return ST_OK;
            }
            break;
        case 'L':
            fits = parse_bool(v);
            if (fits >= 0) {
                *ok = DBFWriteLogicalAttribute(s->dbf, s->nrec, k, fits ? 'T' : 'F');
                return ST_OK;
            }
            break;
        }
        o->unfit++;
    }
    *ok = DBFWriteNULLAttribute(s->dbf, s->nrec, k);
    return ST_OK;
}

static st_status write_record(st_writer *w, shp_writer *s, const st_feature *f)
{
    capture_begin();
    int ok = 1;
    for (uint32_t k = 0; k < s->nfields && ok; k++) {
        if (s->record_field) {
            char buf[32];
            snprintf(buf, sizeof buf, "%*d", s->fields[k].width, s->nrec + 1);
            ok = DBFWriteAttributeDirectly(s->dbf, s->nrec, (int)k, buf);
            continue;
        }
        st_status rc = write_value(s, (int)k, st_feature_value(f, k), &ok);
        if (rc != ST_OK)
            return rc;
    }
    if (!ok || capture.failed)
        return wfail(w, ST_ERR_IO, s->nrec, "cannot write the attribute record: %s",
                     capture_text("refused by Shapelib"));
    return ST_OK;
}

static st_status shp_write(st_writer *w, const st_feature *f)
{
    shp_writer *s = w->impl;
    if (!s || !s->shp)
        return st_writer_fail(w, ST_ERR_USAGE, "no layer was begun");
    SHPObject *obj = NULL;
    long long bytes = 0;
    st_status rc = make_shape(w, s, &f->geom, &obj, &bytes);
    if (rc != ST_OK)
        return rc;
    const char *full = s->shp_bytes + bytes > ST_SHP_MAX_FILE ? ".shp"
                     : s->dbf_bytes + s->dbf_record > ST_SHP_MAX_FILE ? ".dbf" : NULL;
    if (full) {
        SHPDestroyObject(obj);
        return wfail(w, ST_ERR_LIMIT, s->nrec, "this feature would take the %s past "
                     "2 GB, the limit of the format; write a GeoPackage instead", full);
    }
    capture_begin();
    int id = SHPWriteObject(s->shp, -1, obj);
    SHPDestroyObject(obj);
    if (id != s->nrec || capture.failed)
        return wfail(w, ST_ERR_IO, s->nrec, "cannot write the shape: %s",
                     capture_text("refused by Shapelib"));
    rc = write_record(w, s, f);
    if (rc != ST_OK)
        return rc;
    s->nrec++;
    s->shp_bytes += bytes;
    s->dbf_bytes += s->dbf_record;
    return ST_OK;
}

static st_status shp_end(st_writer *w)
{
    (void)w;
    return ST_OK;
}

/* One note per field whose values were cut or left empty. */
static st_status add_value_notes(st_writer *w, const shp_writer *s)
{
    st_status rc = ST_OK;
    for (uint32_t i = 0; i < s->nfields && rc == ST_OK; i++) {
        const out_field *o = &s->fields[i];
        if (o->cut)
            rc = st_buf_printf(&w->notes, "field %s: %lu text values cut to %d bytes\n",
                               o->name, o->cut, o->width);
        if (rc == ST_OK && o->unfit)
            rc = st_buf_printf(&w->notes, "field %s: %lu values that are not %s left "
                               "empty\n", o->name, o->unfit,
                               o->dbf_type == 'L' ? "true/false"
                               : o->type == ST_FIELD_INTEGER ? "integers of at most 18 digits"
                                                             : "finite numbers");
    }
    return rc;
}

static st_status shp_finish(st_writer *w)
{
    shp_writer *s = w->impl;
    st_status rc = ST_OK;
    if (!s || !s->shp) {
        rc = st_writer_fail(w, ST_ERR_USAGE, "no layer was written");
    } else {
        capture_begin();
        SHPClose(s->shp);
        s->shp = NULL;
        DBFClose(s->dbf);
        s->dbf = NULL;
        if (capture.failed)
            rc = st_writer_fail(w, ST_ERR_IO, "cannot finish the temporary files: %s",
                                capture_text(""));
        if (rc == ST_OK)
            rc = add_value_notes(w, s);
    }
    writer_free(s);
    w->impl = NULL;
    return rc;
}

/* Returns owned names stem+ext for each output part, uppercase extensions
** when 'upper'; 0 on no memory (nothing allocated then). */
static int part_names(const char *path, int upper, char *names[OUT_NPARTS])
{
    char *stem = path_without_ext(path);
    int ok = stem != NULL;
    for (int i = 0; i < OUT_NPARTS; i++) {
        names[i] = ok ? st_strdup_printf("%s%s", stem, out_parts[i]) : NULL;
        ok = ok && names[i];
        if (names[i] && upper)
            for (char *c = names[i] + strlen(stem); *c; c++)
                *c = (char)(*c >= 'a' && *c <= 'z' ? *c - 32 : *c);
    }
    st_free(stem);
    if (!ok)
        for (int i = 0; i < OUT_NPARTS; i++) {
            st_free(names[i]);
            names[i] = NULL;
        }
    return ok;
}

static void free_names(char *names[OUT_NPARTS])
{
    for (int i = 0; i < OUT_NPARTS; i++)
        st_free(names[i]);
}

/* Remove the files 'path' with its extension replaced by each of 'exts'
** (best effort). Uses no heap memory, so it also works when memory is
** short and a failure cannot go unreported. */
static void remove_siblings(const char *path, const char *const *exts, size_t n)
{
    size_t stem = strlen(path) - strlen(st_path_ext(path));
    char name[PATH_MAX + 8];
    if (stem >= PATH_MAX)
        return;   /* no such file could have been created */
    for (size_t i = 0; i < n; i++) {
        snprintf(name, sizeof name, "%.*s%s", (int)stem, path, exts[i]);
        remove(name);
    }
}

/* Rename the five temporary files into place, the .shp last. On failure
** the ones already moved (and any .shp at the target) are removed, so
** nothing is left at the target. Stale spatial indexes of an earlier file
** at the target are removed: they would describe other shapes. */
static st_status shp_commit(st_writer *w)
{
    char *from[OUT_NPARTS], *to[OUT_NPARTS];
    int upper = strcmp(st_path_ext(w->path), ".SHP") == 0;
    if (!part_names(w->tmp_path, 0, from))
        return ST_ERR_NOMEM;
    if (!part_names(w->path, upper, to)) {
        free_names(from);
        return ST_ERR_NOMEM;
    }
    st_status rc = ST_OK;
    for (int i = 0; i < OUT_NPARTS && rc == ST_OK; i++) {
        if (rename(from[i], to[i]) == 0)
            continue;
        rc = st_writer_fail(w, ST_ERR_IO, "cannot rename %s into place: %s",
                            to[i], strerror(errno));
        for (int j = 0; j < i; j++)
            remove(to[j]);
        remove(to[OUT_NPARTS - 1]);
    }
    if (rc == ST_OK) {
        static const char *const stale[] = {".qix", ".sbn", ".sbx", ".QIX", ".SBN", ".SBX"};
        remove_siblings(w->path, stale, sizeof stale / sizeof stale[0]);
    }
    free_names(from);
    free_names(to);
    return rc;
}

/* Close and delete whatever temporary files exist; also called when the
** handles are already gone (a commit that failed). */
static void shp_discard(st_writer *w)
{
    writer_free(w->impl);
    w->impl = NULL;
    remove_siblings(w->tmp_path, out_parts, OUT_NPARTS);
}

static const char *const shp_ext[] = {".shp", NULL};

const st_writer_format st_shp_writer_format = {
    "shapefile", shp_ext, 0, shp_wopen, shp_begin, shp_write, shp_end, NULL,
    shp_finish, shp_commit, shp_discard,
};
