/*
** pipeline/settings.c -- a rule file's `footprint` block onto the footprint
** and neighbour stages' configurations.
**
** The rule language checks only the shape of a setting (name, number,
** unit, severity, word); the stages own the meaning. The names each stage
** takes are listed in docs/footprint.md and docs/neighbours.md.
*/
#include <stdlib.h>
#include <string.h>

#include "pipelineInt.h"

/* A diagnostic at a rule's "file:line". */
static st_status rule_error(st_diags *d, const char *where, const char *fmt, const char *a,
                            const char *b)
{
    char file[1024] = "";
    long line = 0;
    const char *colon = where ? strrchr(where, ':') : NULL;
    if (colon && (size_t)(colon - where) < sizeof file) {
        memcpy(file, where, (size_t)(colon - where));
        file[colon - where] = '\0';
        line = strtol(colon + 1, NULL, 10);
    }
    st_loc loc = ST_LOC_LINE(file[0] ? file : NULL, line, 0, 0);
    return st_diags_add(d, ST_SEV_ERROR, ST_ERR_RULE, &loc, fmt, a, b);
}

/* A share for the neighbour stage: "25 %" or a plain 0.25. */
static int share_of(const st_rule_setting *s, double *out)
{
    if (!s->has_number)
        return 0;
    double v = !strcmp(s->unit_si, "ratio") ? s->si : s->unit[0] ? -1.0 : s->number;
    if (!(v > 0.0 && v <= 1.0))
        return 0;
    *out = v;
    return 1;
}

static st_status neighbour_setting(const st_rule_setting *s, st_neighbours_config *nc,
                                   st_diags *d, int *taken)
{
    double *target = NULL;
    st_severity *sev = NULL;
    *taken = 1;
    if (!strcmp(s->name, "overlap"))
        target = &nc->overlap_share, sev = &nc->overlap_severity;
    else if (!strcmp(s->name, "near-duplicate"))
        target = &nc->near_iou, sev = &nc->near_severity;
    else if (!strcmp(s->name, "contained"))
        target = &nc->contained_share, sev = &nc->contained_severity;
    else {
        *taken = 0;
        return ST_OK;
    }
    if (!share_of(s, target))
        return rule_error(d, s->rule, "'%s' takes a share such as 25 %% (got '%s')",
                          s->name, s->unit[0] ? s->unit : "no unit");
    if (s->has_severity)
        *sev = s->severity;
    return ST_OK;
}

static st_status footprint_setting(const st_rule_setting *s, st_footprint_config *fc,
                                   st_diags *d)
{
    char err[256] = "";
    st_status rc;
    if (!s->has_number && s->word)
        rc = st_footprint_config_set_word(fc, s->name, s->word, err, sizeof err);
    else if (s->has_number) {
        const st_severity *sev = s->has_severity ? &s->severity : NULL;
        rc = st_footprint_config_set(fc, s->name, s->number, s->unit, sev, err, sizeof err);
        if (rc != ST_OK && !strcmp(s->unit_si, "m2"))   /* e.g. ft2: use metres */
            rc = st_footprint_config_set(fc, s->name, s->si, "m2", sev, err, sizeof err);
    } else
        return rule_error(d, s->rule, "setting '%s' needs a value%s", s->name, "");
    return rc == ST_OK ? ST_OK : rule_error(d, s->rule, "%s%s", err, "");
}

st_status st_settings_apply(const st_rules *r, st_footprint_config *fc,
                            st_neighbours_config *nc, st_diags *diags)
{
    if (!r)
        return ST_OK;
    st_status first = ST_OK;
    for (size_t i = 0; i < st_rules_setting_count(r); i++) {
        const st_rule_setting *s = st_rules_setting(r, i);
        int taken = 0;
        st_status rc = neighbour_setting(s, nc, diags, &taken);
        if (rc == ST_OK && !taken)
            rc = footprint_setting(s, fc, diags);
        if (rc != ST_OK && first == ST_OK)
            first = rc;
    }
    return first == ST_OK ? st_neighbours_config_check(nc, diags) : first;
}
