/*
** defaults/dtable.c -- reading a defaults table (`table "file.csv"` in a
** defaults block) into default entries.
**
** Input:   a CSV file (csvread.h) with a header row naming its columns:
**            scope   district | region | everywhere          (required)
**            key     the district/region pattern ('*', '?'); empty for
**                    everywhere                              (required)
**            field   a schema field                          (required)
**            value   a valid value of that field             (required)
**            share   percent (60 or 60%); empty for a single value
**            <field> a condition on another schema field: a value, or for
**                    a number field a range lo..hi (either end may be left
**                    open); an empty cell means any value
**            note, source, comment   ignored (for the table's own notes)
**          Rows with the same scope, key, field and conditions form one
**          distribution; its shares must add up to 100 %.
** Output:  entries appended to the st_defaults set, in the order their
**          first row appears; their rule is "file:line" of that row.
** Errors:  ST_ERR_RULE with "file:line: ..." for bad content,
**          ST_ERR_FORMAT/IO/LIMIT from the CSV reader.
** Limits:  ST_DEFAULTS_MAX_TABLE_BYTES a file, ST_DEFAULTS_MAX_ROWS rows.
*/
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <strings.h>

#include "defaultsInt.h"
#include "stocktake/csvread.h"

enum { COL_IGNORE = -1, COL_SCOPE = -2, COL_KEY = -3, COL_FIELD = -4, COL_VALUE = -5,
       COL_SHARE = -6 };

typedef struct tstate {
    st_defaults *d;
    const char *path;
    const char *rule;          /* the `table` line, for context */
    st_diags *diags;
    int32_t *col;              /* per column: COL_* or a condition's field */
    size_t ncols;
    int have[5];               /* scope key field value share seen */
    st_strtab *groups;         /* group signature -> index among 'first' */
    size_t *first;             /* per group: entry index */
    long *first_line;          /* per group: line of its first row */
    size_t ngroups, capgroups;
    st_buf sig;
    size_t rows;
} tstate;

static st_status bad(tstate *t, long line, const char *fmt, const char *a, const char *b)
{
    st_loc loc = ST_LOC_LINE(t->path, line, 0, 0);
    return st_diags_add(t->diags, ST_SEV_ERROR, ST_ERR_RULE, &loc, fmt, a, b);
}

static st_status header(tstate *t, long line, char *const *cells, size_t n)
{
    static const char *const names[] = {"scope", "key", "field", "value", "share"};
    t->col = st_calloc(n ? n : 1, sizeof *t->col);
    if (!t->col)
        return ST_ERR_NOMEM;
    t->ncols = n;
    for (size_t i = 0; i < n; i++) {
        int32_t c = COL_IGNORE;
        for (int k = 0; k < 5; k++)
            if (!strcasecmp(cells[i], names[k])) {
                if (t->have[k])
                    return bad(t, line, "column '%s' is given twice%s", cells[i], "");
                t->have[k] = 1;
                c = -2 - k;
            }
        if (c == COL_IGNORE && strcasecmp(cells[i], "note") && strcasecmp(cells[i], "source") &&
            strcasecmp(cells[i], "comment")) {
            c = st_rules_field_find(t->d->rules, cells[i]);
            if (c < 0)
                return bad(t, line,
                           "column '%s' is neither scope, key, field, value, share, note, "
                           "source, comment nor a schema field%s", cells[i], "");
        }
        t->col[i] = c;
    }
    for (int k = 0; k < 4; k++)
        if (!t->have[k])
            return bad(t, line, "the header has no '%s' column%s", names[k], "");
    return ST_OK;
}

/* "60", "60%", "12.5 %" -> 60, 60, 12.5; -1 when not a share. */
static double parse_share(const char *s)
{
    char *end;
    double v = strtod(s, &end);
    if (end == s)
        return -1;
    while (*end == ' ')
        end++;
    if (*end == '%')
        end++;
    return *end || !(v > 0) || v > 100 ? -1 : v;
}

/* A condition cell on field fi: a value, or lo..hi for a number field. */
static st_status parse_cond(tstate *t, long line, uint32_t fi, const char *cell, dcond *c)
{
    const st_schema_field *sf = st_rules_field(t->d->rules, fi);
    int numeric = sf->kind == ST_KIND_INTEGER || sf->kind == ST_KIND_REAL;
    const char *dots = numeric ? strstr(cell, "..") : NULL;
    c->field = fi;
    if (!dots) {
        if (!st_rules_field_accepts(t->d->rules, fi, cell))
            return bad(t, line, "'%s' is not a value of field '%s'", cell, sf->name);
        c->text = st_defaults_keep(t->d, cell);
        c->is_range = 0;
        return c->text ? ST_OK : ST_ERR_NOMEM;
    }
    char lo[64], *end;
    size_t nlo = (size_t)(dots - cell);
    c->is_range = 1;
    c->lo = -INFINITY;
    c->hi = INFINITY;
    if (nlo >= sizeof lo)
        return bad(t, line, "'%s' is not a range lo..hi of field '%s'", cell, sf->name);
    if (nlo) {
        memcpy(lo, cell, nlo);
        lo[nlo] = '\0';
        c->lo = strtod(lo, &end);
        while (*end == ' ')
            end++;
        if (end == lo || *end)
            return bad(t, line, "'%s' is not a range lo..hi of field '%s'", cell, sf->name);
    }
    if (dots[2]) {
        c->hi = strtod(dots + 2, &end);
        if (end == dots + 2 || *end)
            return bad(t, line, "'%s' is not a range lo..hi of field '%s'", cell, sf->name);
    }
    if (c->lo > c->hi)
        return bad(t, line, "range '%s' of field '%s' is empty", cell, sf->name);
    return ST_OK;
}

/* The entry of this row's group: found by its signature, or new. */
static st_status group_of(tstate *t, long line, st_scope scope, const char *key, uint32_t fi,
                          dcond *conds, uint32_t nconds, dentry **out)
{
    st_buf_clear(&t->sig);
    st_status rc = st_buf_printf(&t->sig, "%d\x1f%s\x1f%u", (int)scope, key, fi);
    for (uint32_t i = 0; rc == ST_OK && i < nconds; i++)
        rc = conds[i].is_range
                 ? st_buf_printf(&t->sig, "\x1f%u:%.17g..%.17g", conds[i].field, conds[i].lo,
                                 conds[i].hi)
                 : st_buf_printf(&t->sig, "\x1f%u=%s", conds[i].field, conds[i].text);
    uint32_t id;
    int added = 0;
    if (rc == ST_OK)
        rc = st_strtab_intern(t->groups, t->sig.data, t->sig.len, &id, &added);
    if (rc != ST_OK)
        return rc;
    if (!added) {
        *out = &t->d->e[t->first[id]];
        return ST_OK;
    }
    if (t->ngroups == t->capgroups) {
        size_t cap = t->capgroups ? 2 * t->capgroups : 64;
        size_t *a = st_realloc(t->first, cap * sizeof *a);
        if (a)
            t->first = a;
        long *b = a ? st_realloc(t->first_line, cap * sizeof *b) : NULL;
        if (!b)
            return ST_ERR_NOMEM;
        t->first_line = b;
        t->capgroups = cap;
    }
    dentry *e = NULL;
    rc = st_defaults_new_entry(t->d, &e);
    if (rc != ST_OK)
        return rc;
    e->src = SRC_TABLE;
    e->scope = scope;
    e->field = fi;
    e->pattern = scope == ST_SCOPE_EVERYWHERE ? NULL : st_defaults_keep(t->d, key);
    char *rule = st_strdup_printf("%s:%ld", t->path, line);
    e->rule = rule ? st_defaults_keep_owned(t->d, rule) : NULL;
    if ((scope != ST_SCOPE_EVERYWHERE && !e->pattern) || !e->rule)
        return ST_ERR_NOMEM;
    if (nconds) {
        e->conds = st_malloc(nconds * sizeof *e->conds);
        if (!e->conds)
            return ST_ERR_NOMEM;
        memcpy(e->conds, conds, nconds * sizeof *conds);
        e->nconds = nconds;
    }
    t->first[t->ngroups] = (size_t)(e - t->d->e);
    t->first_line[t->ngroups++] = line;
    *out = e;
    return ST_OK;
}

static st_status add_choice(tstate *t, long line, dentry *e, const char *value, double share)
{
    for (uint32_t i = 0; i < e->nchoices; i++)
        if (!strcmp(e->choices[i].value, value))
            return bad(t, line, "'%s' is given twice for this default (first at %s)", value,
                       e->rule);
    dchoice *a = st_realloc(e->choices, (e->nchoices + 1) * sizeof *a);
    if (!a)
        return ST_ERR_NOMEM;
    e->choices = a;
    a[e->nchoices].value = st_defaults_keep(t->d, value);
    a[e->nchoices].share = share;   /* percent for now; -1 without a share */
    if (!a[e->nchoices].value)
        return ST_ERR_NOMEM;
    e->nchoices++;
    return ST_OK;
}

static st_status row(void *ud, long line, char *const *cells, size_t n)
{
    tstate *t = ud;
    if (!t->col)
        return header(t, line, cells, n);
    if (++t->rows + t->d->table_rows > ST_DEFAULTS_MAX_ROWS) {
        st_loc loc = ST_LOC_LINE(t->path, line, 0, 0);
        return st_diags_add(t->diags, ST_SEV_ERROR, ST_ERR_LIMIT, &loc,
                            "defaults tables have more than %u rows", ST_DEFAULTS_MAX_ROWS);
    }
    if (n != t->ncols) {
        char got[32], want[32];
        snprintf(got, sizeof got, "%zu", n);
        snprintf(want, sizeof want, "%zu", t->ncols);
        return bad(t, line, "%s cells where the header has %s", got, want);
    }
    const char *scope_s = "", *key = "", *field = "", *value = "", *share_s = "";
    dcond conds[ST_CSV_MAX_COLUMNS];
    uint32_t nconds = 0;
    for (size_t i = 0; i < n; i++) {
        switch (t->col[i]) {
        case COL_SCOPE: scope_s = cells[i]; break;
        case COL_KEY: key = cells[i]; break;
        case COL_FIELD: field = cells[i]; break;
        case COL_VALUE: value = cells[i]; break;
        case COL_SHARE: share_s = cells[i]; break;
        case COL_IGNORE: break;
        default:
            if (cells[i][0]) {
                st_status rc = parse_cond(t, line, (uint32_t)t->col[i], cells[i], &conds[nconds]);
                if (rc != ST_OK)
                    return rc;
                nconds++;
            }
        }
    }
    st_scope scope;
    if (!strcasecmp(scope_s, "district"))
        scope = ST_SCOPE_DISTRICT;
    else if (!strcasecmp(scope_s, "region"))
        scope = ST_SCOPE_REGION;
    else if (!strcasecmp(scope_s, "everywhere"))
        scope = ST_SCOPE_EVERYWHERE;
    else
        return bad(t, line, "scope '%s' is not district, region or everywhere%s", scope_s, "");
    if (scope == ST_SCOPE_EVERYWHERE && key[0])
        return bad(t, line, "an 'everywhere' row takes no key (got '%s')%s", key, "");
    if (scope != ST_SCOPE_EVERYWHERE && !key[0])
        return bad(t, line, "a '%s' row needs a key (a name or pattern)%s", scope_s, "");
    int32_t fi = st_rules_field_find(t->d->rules, field);
    if (fi < 0)
        return bad(t, line, "'%s' is not a schema field%s", field, "");
    for (uint32_t i = 0; i < nconds; i++)
        if (conds[i].field == (uint32_t)fi)
            return bad(t, line, "the default for '%s' cannot depend on '%s' itself", field, field);
    if (!st_rules_field_accepts(t->d->rules, (uint32_t)fi, value))
        return bad(t, line, "'%s' is not a value of field '%s'", value, field);
    double share = -1;
    if (share_s[0] && (share = parse_share(share_s)) < 0)
        return bad(t, line, "share '%s' is not a percentage above 0 and at most 100%s", share_s,
                   "");
    dentry *e = NULL;
    st_status rc = group_of(t, line, scope, key, (uint32_t)fi, conds, nconds, &e);
    return rc == ST_OK ? add_choice(t, line, e, value, share) : rc;
}

/* Shares: all given and adding up to 100, or one value without a share. */
static st_status check_groups(tstate *t)
{
    for (size_t g = 0; g < t->ngroups; g++) {
        dentry *e = &t->d->e[t->first[g]];
        double sum = 0;
        uint32_t with = 0;
        for (uint32_t i = 0; i < e->nchoices; i++)
            if (e->choices[i].share >= 0) {
                with++;
                sum += e->choices[i].share;
            }
        const char *field = st_rules_field(t->d->rules, e->field)->name;
        if (e->nchoices == 1 && !with) {
            e->choices[0].share = 1;
            continue;
        }
        if (with != e->nchoices)
            return bad(t, t->first_line[g], "default for '%s': give a share on every row of "
                       "a distribution, or one row without a share%s", field, "");
        if (fabs(sum - 100.0) > 1e-6) {
            char s[32];
            snprintf(s, sizeof s, "%g", sum);
            return bad(t, t->first_line[g], "default for '%s': shares add up to %s%%, not 100%%",
                       field, s);
        }
        for (uint32_t i = 0; i < e->nchoices; i++)
            e->choices[i].share /= 100.0;
    }
    return ST_OK;
}

st_status st_defaults_read_table(st_defaults *d, const st_default_table *tb, st_diags *diags)
{
    tstate t;
    memset(&t, 0, sizeof t);
    t.d = d;
    t.path = tb->path;
    t.rule = tb->rule;
    t.diags = diags;
    st_buf_init(&t.sig, 1 << 20);
    t.groups = st_strtab_new(0, 0);
    st_status rc = t.groups ? ST_OK : ST_ERR_NOMEM;
    if (rc == ST_OK)
        rc = st_csv_read(tb->path, ST_DEFAULTS_MAX_TABLE_BYTES, row, &t, diags);
    if (rc == ST_OK && !t.col) {
        st_loc loc = ST_LOC_FILE(tb->path);
        rc = st_diags_add(diags, ST_SEV_ERROR, ST_ERR_RULE, &loc,
                          "the defaults table is empty (named at %s)", tb->rule);
    }
    if (rc == ST_OK)
        rc = check_groups(&t);
    d->table_rows += t.rows;
    st_free(t.col);
    st_free(t.first);
    st_free(t.first_line);
    st_strtab_free(t.groups);
    st_buf_free(&t.sig);
    return rc;
}
