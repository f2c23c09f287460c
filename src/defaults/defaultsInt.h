/*
** defaults/defaultsInt.h -- what defaults.c (choosing and applying) and
** dtable.c (reading CSV tables) share: one default entry, whatever wrote it.
*/
#ifndef STOCKTAKE_DEFAULTS_INT_H
#define STOCKTAKE_DEFAULTS_INT_H

#include "stocktake/defaults.h"
#include "stocktake/strtab.h"

typedef enum { SRC_INLINE, SRC_TABLE, SRC_LEARNED } dsrc;

typedef struct dchoice {
    const char *value;          /* borrowed from the rules or kept by the set */
    double share;               /* 0..1 */
} dchoice;

/* A table row's condition on another field: equal to 'text', or (number
** fields) within [lo, hi]. An unknown value never satisfies it. */
typedef struct dcond {
    uint32_t field;
    int is_range;
    const char *text;
    double lo, hi;
} dcond;

typedef struct dentry {
    dsrc src;
    st_scope scope;
    const char *pattern;        /* district/region glob, NULL everywhere */
    uint32_t field;
    const st_default_rule *inl; /* SRC_INLINE: its condition */
    dcond *conds;               /* SRC_TABLE: owned */
    uint32_t nconds;
    dchoice *choices;           /* owned array */
    uint32_t nchoices;
    uint32_t best;              /* the most likely choice */
    const char *rule;           /* "file:line" */
} dentry;

struct st_defaults {
    const st_rules *rules;
    uint32_t nfields;
    size_t nd;                  /* districts */
    char **dkeys;               /* owned copies */
    int32_t *dregion;           /* region id of each district, -1 */
    st_strtab *regions;         /* region keys */
    dentry *e;                  /* entries, inline then tables then learned */
    size_t ne, cape;
    char **owned;               /* strings the set keeps (table values, rules) */
    size_t nowned, capowned;
    size_t table_rows;
    st_defaults_learned *learned;
    size_t nlearned, caplearned;
    int32_t *learned_d;         /* [nd * nfields]: learned entry or -1 */
    int32_t *learned_r;         /* [nregions * nfields] */
    /* per district and per region, the entries whose pattern matches, in
    ** entry order (CSR: off[p] .. off[p + 1] into idx) */
    size_t *doff, *roff;
    uint32_t *didx, *ridx;
    uint32_t *every;            /* everywhere entries, in order */
    size_t nevery;
    uint32_t *order;            /* fields in fill order */
    int built;
    st_diags *diags;            /* for warnings while building */
};

/* Keep a copy of s (returns the copy, owned by d; NULL on no memory). */
const char *st_defaults_keep(st_defaults *d, const char *s);
/* Keep s itself (takes ownership; freed at once when it cannot be kept). */
const char *st_defaults_keep_owned(st_defaults *d, char *s);
/* A new zeroed entry at the end of d->e (pointers into d->e move). */
st_status st_defaults_new_entry(st_defaults *d, dentry **out) ST_MUST_CHECK;
/* Read one `table` file into entries. */
st_status st_defaults_read_table(st_defaults *d, const st_default_table *t,
                                 st_diags *diags) ST_MUST_CHECK;

#endif
