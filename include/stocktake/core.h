/*
** stocktake/core.h -- status codes, diagnostics, allocation and small
** string helpers shared by every module.
**
** The library never prints and never exits: a fallible function returns an
** st_status and, where there is something to say, adds one diagnostic to
** the st_diags list its caller passed in. The CLI renders them.
**
** Ownership words used in every prototype comment of the project:
**   borrows            -- the callee keeps no reference after it returns;
**   takes ownership    -- the callee frees it, even on failure;
**   returns owned      -- the caller frees it with the named function.
** Every *_free(NULL) is a no-op.
*/
#ifndef STOCKTAKE_CORE_H
#define STOCKTAKE_CORE_H

#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <stdio.h>

#define ST_VERSION "0.1.0"

#if defined(__GNUC__)
#define ST_MUST_CHECK __attribute__((warn_unused_result))
#define ST_PRINTF(f, a) __attribute__((format(printf, f, a)))
#else
#define ST_MUST_CHECK
#define ST_PRINTF(f, a)
#endif

typedef enum {
    ST_OK = 0,      /* done */
    ST_ERR_NOMEM,   /* an allocation failed */
    ST_ERR_IO,      /* a file could not be opened, read, written or renamed */
    ST_ERR_FORMAT,  /* a file's content breaks its format */
    ST_ERR_RULE,    /* a rule file has errors */
    ST_ERR_GEOS,    /* GEOS raised an exception */
    ST_ERR_PROJ,    /* PROJ could not build or apply a transformation */
    ST_ERR_LIMIT,   /* an input exceeds a documented limit */
    ST_ERR_USAGE,   /* a caller passed a bad option or argument */
    ST_ERR_STOPPED  /* the caller asked the work to stop (an interrupt) */
} st_status;

/* Short lowercase name of a status ("nomem", "io", ...). Never NULL. */
const char *st_status_name(st_status s);

/* ---- allocation -------------------------------------------------------- */

/*
** All project allocations go through these wrappers so that a test can make
** the Nth allocation fail (st_alloc_fail_after). The counter is thread-local
** and only consulted while armed, so production runs pay one branch.
*/
void *st_malloc(size_t n);
void *st_calloc(size_t count, size_t n);
void *st_realloc(void *p, size_t n);
void st_free(void *p);
/* Returns owned copy of 's' (NULL in gives NULL out, or NULL on no memory). */
char *st_strdup(const char *s);
char *st_strndup(const char *s, size_t n);
/* Returns owned formatted string, or NULL on no memory. */
char *st_strdup_printf(const char *fmt, ...) ST_PRINTF(1, 2);

/* Test hook: allocation number n (1-based, counted from this call) fails;
** 0 disarms. Returns the number of allocations counted since arming. */
void st_alloc_fail_after(long n);
long st_alloc_count(void);

/* ---- growable byte buffer with a hard cap ------------------------------ */

typedef struct st_buf {
    char *data;     /* NUL-terminated when len < cap; owned */
    size_t len;
    size_t cap;
    size_t limit;   /* 0 = no limit; beyond it appends fail with ST_ERR_LIMIT */
} st_buf;

void st_buf_init(st_buf *b, size_t limit);
st_status st_buf_append(st_buf *b, const char *s, size_t n) ST_MUST_CHECK;
st_status st_buf_puts(st_buf *b, const char *s) ST_MUST_CHECK;
st_status st_buf_printf(st_buf *b, const char *fmt, ...) ST_PRINTF(2, 3) ST_MUST_CHECK;
void st_buf_clear(st_buf *b);       /* len = 0, keeps memory */
void st_buf_free(st_buf *b);        /* releases memory, re-initialises */
/* Transfers the text to the caller (returns owned, "" when empty). */
char *st_buf_take(st_buf *b);

/* ---- diagnostics -------------------------------------------------------- */

typedef enum { ST_SEV_NOTE, ST_SEV_WARNING, ST_SEV_ERROR } st_severity;

/*
** Where a diagnostic points. Unknown parts are 0 (line, col, len) or -1
** (feature, offset). 'file' is borrowed by st_diags_add, which copies it.
*/
typedef struct st_loc {
    const char *file;
    long line;          /* 1-based text line */
    long col;           /* 1-based byte column */
    long len;           /* underline length in bytes (rules) */
    long long feature;  /* 0-based feature index in its layer */
    long long offset;   /* byte offset in the file */
} st_loc;

#define ST_LOC_NONE ((st_loc){NULL, 0, 0, 0, -1, -1})
#define ST_LOC_FILE(f) ((st_loc){(f), 0, 0, 0, -1, -1})
#define ST_LOC_FEATURE(f, i) ((st_loc){(f), 0, 0, 0, (i), -1})
#define ST_LOC_OFFSET(f, o) ((st_loc){(f), 0, 0, 0, -1, (o)})
#define ST_LOC_LINE(f, l, c, n) ((st_loc){(f), (l), (c), (n), -1, -1})

typedef struct st_diag {
    st_severity severity;
    st_status code;
    char *file;         /* owned; NULL when not about a file */
    long line, col, len;
    long long feature, offset;
    char *message;      /* owned */
    char *excerpt;      /* owned source line for a caret display, or NULL */
} st_diag;

typedef struct st_diags {
    st_diag *items;
    size_t count, cap;
    size_t errors, warnings;
    size_t max_items;   /* beyond it new diagnostics are only counted (0 = 1000) */
    size_t dropped;
} st_diags;

void st_diags_init(st_diags *d);
void st_diags_free(st_diags *d);
/* Adds one diagnostic; returns 'code' so callers can write
** `return st_diags_add(d, ST_SEV_ERROR, ST_ERR_IO, &loc, "...")`.
** On allocation failure the diagnostic is only counted. */
st_status st_diags_add(st_diags *d, st_severity sev, st_status code,
                       const st_loc *loc, const char *fmt, ...) ST_PRINTF(5, 6);
st_status st_diags_addv(st_diags *d, st_severity sev, st_status code,
                        const st_loc *loc, const char *fmt, va_list ap);
/* Attach a source line to the last diagnostic, for a caret display. */
void st_diags_set_excerpt(st_diags *d, const char *line, size_t n);
/* Renders one diagnostic as
**   file:line:col: error: message        (rules; then the line and a caret)
**   file: feature N: error: message      (data)
**   file: byte N: error: message
** into 'out' (appends). */
st_status st_diag_render(const st_diag *g, st_buf *out) ST_MUST_CHECK;

/* ---- time ----------------------------------------------------------------- */

/*
** The run's clock as ISO 8601 UTC ("2026-12-02T04:10:00Z") into buf. When
** the environment sets SOURCE_DATE_EPOCH (seconds since 1970, the common
** convention for reproducible outputs) that time is used instead of now,
** so the same inputs give byte-identical outputs.
*/
void st_now_iso8601(char buf[32]);

/* ---- opening input files ---------------------------------------------- */

/*
** Open 'path' for reading ("rb") only if it is a regular file: a FIFO would
** block the open or the reads for ever, and a device may never end. The
** check is made without blocking, on the descriptor itself. Returns the
** stream (close with fclose), or NULL with errno set: EISDIR for a folder,
** EINVAL for anything else that is not a regular file (st_open_error()
** words both).
*/
FILE *st_fopen_regular(const char *path);
/* Why st_fopen_regular failed, from errno (static text). */
const char *st_open_error(int err);

/* ---- small string helpers --------------------------------------------- */

/* 1 if s ends with suffix, compared ASCII case-insensitively. */
int st_str_ends_with_ci(const char *s, const char *suffix);
/* Byte length of the longest valid UTF-8 prefix of s[0..n). */
size_t st_utf8_valid_prefix(const char *s, size_t n);
/* Returns owned copy of s[0..n) with invalid UTF-8 bytes replaced by U+FFFD. */
char *st_utf8_sanitize(const char *s, size_t n);

/* ---- decimal numbers (core/numfmt.c) ----------------------------------- */

#define ST_FMT_MAX_DECIMALS 15
#define ST_FMT_FIXED_MAX 352   /* "%.15f" of -DBL_MAX and the NUL */
/* Write v into out (ST_FMT_FIXED_MAX bytes) as printf("%.*f", decimals, v)
** would, character for character, and return the length; much faster for
** ordinary non-negative values. decimals is clamped to 0..15. */
size_t st_fmt_fixed(char *out, double v, int decimals);
/* If s is a plain decimal (-?digits(.digits)?, at most 15 digits in all),
** set *out to what strtod(s) gives and return 1; otherwise return 0 and
** leave *out alone (the caller parses it the slow way). */
int st_parse_decimal_fast(const char *s, double *out);

#endif
