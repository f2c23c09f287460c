/*
** footprint/fpconfig.c -- the footprint stage's settings: the one place
** where default thresholds and severities are written (their reasons are in
** docs/footprint.md), the finding-code table, and setting by name for the
** rule engine's footprint block.
**
** Input:   names, values and units as a rule file gives them.
** Output:  an st_footprint_config value.
** Errors:  unknown names, units or keywords and out-of-range values give
**          ST_ERR_USAGE and a message in the caller's buffer; the config is
**          then unchanged.
*/
#include <math.h>
#include <stdarg.h>
#include <stdio.h>
#include <string.h>

#include "stocktake/footprint.h"

/* Code names and default severities, indexed by st_fp_code. */
static const struct {
    const char *name;
    st_severity severity;
} codes[ST_FP_NCODES] = {
    [ST_FP_NULL] = {"geom.null", ST_SEV_ERROR},
    [ST_FP_EMPTY] = {"geom.empty", ST_SEV_ERROR},
    [ST_FP_WRONG_TYPE] = {"geom.wrong-type", ST_SEV_ERROR},
    [ST_FP_COLLECTION] = {"geom.collection", ST_SEV_WARNING},
    [ST_FP_BAD_COORD] = {"geom.bad-coordinate", ST_SEV_ERROR},
    [ST_FP_OUT_OF_RANGE] = {"geom.out-of-range", ST_SEV_ERROR},
    [ST_FP_SWAPPED] = {"geom.swapped-axes", ST_SEV_ERROR},
    [ST_FP_UNCLOSED] = {"geom.unclosed-ring", ST_SEV_WARNING},
    [ST_FP_TOO_FEW_POINTS] = {"geom.too-few-points", ST_SEV_ERROR},
    [ST_FP_SELF_INTERSECTION] = {"geom.self-intersection", ST_SEV_ERROR},
    [ST_FP_RING_SELF_INTERSECTION] = {"geom.ring-self-intersection", ST_SEV_ERROR},
    [ST_FP_HOLE_OUTSIDE_SHELL] = {"geom.hole-outside-shell", ST_SEV_ERROR},
    [ST_FP_NESTED_HOLES] = {"geom.nested-holes", ST_SEV_ERROR},
    [ST_FP_DISCONNECTED_INTERIOR] = {"geom.disconnected-interior", ST_SEV_ERROR},
    [ST_FP_NESTED_SHELLS] = {"geom.nested-shells", ST_SEV_ERROR},
    [ST_FP_DUPLICATE_RINGS] = {"geom.duplicate-rings", ST_SEV_ERROR},
    [ST_FP_INVALID_OTHER] = {"geom.invalid", ST_SEV_ERROR},
    [ST_FP_GEOS_ERROR] = {"geom.geos-error", ST_SEV_ERROR},
    [ST_FP_REPEATED] = {"geom.repeated-vertex", ST_SEV_NOTE},
    [ST_FP_SPIKE] = {"geom.spike", ST_SEV_WARNING},
    [ST_FP_FRAGMENT] = {"shape.fragment", ST_SEV_WARNING},
    [ST_FP_OVERSIZE] = {"shape.oversize", ST_SEV_WARNING},
    [ST_FP_SLIVER] = {"shape.sliver", ST_SEV_WARNING},
    [ST_FP_MANY_VERTICES] = {"shape.too-many-vertices", ST_SEV_WARNING},
    [ST_FP_REPAIRED] = {"repair.applied", ST_SEV_NOTE},
    [ST_FP_PARTS_DROPPED] = {"repair.parts-dropped", ST_SEV_NOTE},
    [ST_FP_AREA_CHANGED] = {"repair.area-changed", ST_SEV_WARNING},
    [ST_FP_REPAIR_FAILED] = {"repair.failed", ST_SEV_ERROR},
};

const char *st_footprint_code_name(st_fp_code c)
{
    return (unsigned)c < ST_FP_NCODES ? codes[c].name : "";
}

int st_footprint_code_find(const char *name)
{
    for (int c = 0; c < ST_FP_NCODES; c++)
        if (strcmp(codes[c].name, name) == 0)
            return c;
    return -1;
}

st_footprint_config st_footprint_config_default(void)
{
    st_footprint_config cfg = {
        .min_area_m2 = 6.0,          /* sheds and digitising crumbs */
        .max_area_m2 = 100000.0,     /* 10 ha: beyond the largest halls */
        .min_compactness = 0.1,      /* thinner than about 1:29 */
        .max_vertices = 1000,        /* 10x the most detailed real footprint seen */
        .spike_angle_deg = 1.0,      /* "turns straight back" */
        .max_area_change = 0.01,     /* 1 % */
        .repair = ST_REPAIR_MAKE_VALID,
        .method = ST_REPAIR_STRUCTURE,
    };
    for (int c = 0; c < ST_FP_NCODES; c++)
        cfg.severity[c] = codes[c].severity;
    return cfg;
}

const char *st_repair_policy_name(st_repair_policy p)
{
    return p == ST_REPAIR_REJECT ? "reject" : p == ST_REPAIR_KEEP ? "keep" : "make-valid";
}

const char *st_repair_method_name(st_repair_method m)
{
    return m == ST_REPAIR_LINEWORK ? "linework" : "structure";
}

/* ---- setting by name ---------------------------------------------------- */

typedef enum { U_AREA, U_NONE, U_DEG, U_PERCENT } unit_kind;

/* One numeric setting: where it lives, its unit, its range, its code. */
typedef struct setting {
    const char *name;
    unit_kind unit;
    double lo, hi;          /* accepted range, in the stored unit */
    st_fp_code code;
} setting;

static const setting settings[] = {
    {"min-area", U_AREA, 0.0, INFINITY, ST_FP_FRAGMENT},
    {"max-area", U_AREA, 0.0, INFINITY, ST_FP_OVERSIZE},
    {"min-compactness", U_NONE, 0.0, 1.0, ST_FP_SLIVER},
    {"max-vertices", U_NONE, 0.0, ST_FOOTPRINT_MAX_COORDS, ST_FP_MANY_VERTICES},
    {"spike-angle", U_DEG, 0.0, 90.0, ST_FP_SPIKE},
    {"max-area-change", U_PERCENT, 0.0, 100.0, ST_FP_AREA_CHANGED},
};

static st_status fail(char *err, size_t n, const char *fmt, ...) ST_PRINTF(3, 4);

/* Writes the message (when the caller gave a buffer); returns ST_ERR_USAGE. */
static st_status fail(char *err, size_t n, const char *fmt, ...)
{
    if (err && n) {
        va_list ap;
        va_start(ap, fmt);
        vsnprintf(err, n, fmt, ap);
        va_end(ap);
    }
    return ST_ERR_USAGE;
}

static int unit_is(const char *unit, const char *want)
{
    return strcmp(unit ? unit : "", want) == 0;
}

/* Converts value in 'unit' to the stored unit; 0 when the unit does not fit. */
static int to_stored(unit_kind kind, const char *unit, double *value)
{
    switch (kind) {
    case U_AREA: {
        double scale = unit_is(unit, "m2") ? 1.0 : unit_is(unit, "ha") ? 1e4
                     : unit_is(unit, "km2") ? 1e6 : 0.0;
        *value *= scale;
        return scale > 0.0;
    }
    case U_NONE:
        return unit_is(unit, "");
    case U_DEG:
        return unit_is(unit, "deg");
    case U_PERCENT:
        return unit_is(unit, "%");
    }
    return 0;
}

static const char *unit_hint(unit_kind kind)
{
    switch (kind) {
    case U_AREA: return "m2, ha or km2";
    case U_NONE: return "no unit";
    case U_DEG: return "deg";
    case U_PERCENT: return "%";
    }
    return "";
}

st_status st_footprint_config_set(st_footprint_config *cfg, const char *name,
                                  double value, const char *unit,
                                  const st_severity *sev, char *err, size_t errlen)
{
    const setting *s = NULL;
    for (size_t i = 0; i < sizeof settings / sizeof settings[0]; i++)
        if (strcmp(settings[i].name, name) == 0)
            s = &settings[i];
    if (!s)
        return fail(err, errlen, "unknown footprint setting '%s'", name);
    if (!to_stored(s->unit, unit, &value))
        return fail(err, errlen, "'%s' takes %s", name, unit_hint(s->unit));
    if (!(value >= s->lo && value <= s->hi))
        return fail(err, errlen, "'%s': value out of range", name);
    if (sev && (*sev < ST_SEV_NOTE || *sev > ST_SEV_ERROR))
        return fail(err, errlen, "'%s': unknown severity", name);
    switch (s->code) {
    case ST_FP_FRAGMENT: cfg->min_area_m2 = value; break;
    case ST_FP_OVERSIZE: cfg->max_area_m2 = value; break;
    case ST_FP_SLIVER: cfg->min_compactness = value; break;
    case ST_FP_SPIKE: cfg->spike_angle_deg = value; break;
    case ST_FP_AREA_CHANGED: cfg->max_area_change = value / 100.0; break;
    case ST_FP_MANY_VERTICES:
        if (value != floor(value) || (value > 0 && value < 4))
            return fail(err, errlen, "'%s' must be 0 (off) or a whole number >= 4", name);
        cfg->max_vertices = (uint32_t)value;
        break;
    default: break;
    }
    if (sev)
        cfg->severity[s->code] = *sev;
    return ST_OK;
}

st_status st_footprint_config_set_word(st_footprint_config *cfg, const char *name,
                                       const char *word, char *err, size_t errlen)
{
    if (strcmp(name, "repair") == 0) {
        static const st_repair_policy all[] = {ST_REPAIR_MAKE_VALID, ST_REPAIR_REJECT,
                                               ST_REPAIR_KEEP};
        for (size_t i = 0; i < 3; i++)
            if (strcmp(word, st_repair_policy_name(all[i])) == 0) {
                cfg->repair = all[i];
                return ST_OK;
            }
        return fail(err, errlen, "repair: '%s' is not make-valid, reject or keep", word);
    }
    if (strcmp(name, "repair-method") == 0) {
        if (strcmp(word, "structure") == 0)
            cfg->method = ST_REPAIR_STRUCTURE;
        else if (strcmp(word, "linework") == 0)
            cfg->method = ST_REPAIR_LINEWORK;
        else
            return fail(err, errlen, "repair-method: '%s' is not structure or linework", word);
        return ST_OK;
    }
    return fail(err, errlen, "unknown footprint setting '%s'", name);
}

st_status st_footprint_config_set_severity(st_footprint_config *cfg, const char *code,
                                           st_severity sev, char *err, size_t errlen)
{
    int c = st_footprint_code_find(code);
    if (c < 0)
        return fail(err, errlen, "unknown footprint finding code '%s'", code);
    if (sev < ST_SEV_NOTE || sev > ST_SEV_ERROR)
        return fail(err, errlen, "'%s': unknown severity", code);
    cfg->severity[c] = sev;
    return ST_OK;
}

/* Names of the ST_FLAG_* bits, in bit order (docs/output.md). */
static const char *const flag_names[] = {
    "null", "empty", "wrong-type", "bad-coordinate", "out-of-range", "swapped-axes",
    "unclosed-ring", "too-few-points", "invalid", "repeated-vertex", "spike",
    "fragment", "oversize", "sliver", "too-many-vertices", "repaired",
    "area-changed", "replaced", "geos-error",
};

st_status st_footprint_flag_names(uint32_t flags, st_buf *out)
{
    st_status rc = ST_OK;
    int first = 1;
    for (size_t b = 0; rc == ST_OK && b < sizeof flag_names / sizeof flag_names[0]; b++) {
        if (!(flags & (1u << b)))
            continue;
        if (!first)
            rc = st_buf_append(out, ",", 1);
        if (rc == ST_OK)
            rc = st_buf_puts(out, flag_names[b]);
        first = 0;
    }
    return rc;
}
