/*
** rules/uses.c -- which schema fields a default line's condition reads, so
** the defaults stage can fill a field after the fields its conditions
** depend on.
**
** Input:   a checked default rule (its condition's names are resolved).
** Output:  1/0; no allocation, no errors.
** Limits:  the walk follows the tree, whose depth the parser caps at
**          ST_RULES_MAX_DEPTH.
*/
#include "rulesInt.h"

static int uses(const rexpr *e, uint32_t field)
{
    if (!e)
        return 0;
    if (e->kind == E_NAME && e->ref == REF_FIELD && e->index == (int32_t)field)
        return 1;
    if (uses(e->a, field) || uses(e->b, field))
        return 1;
    for (uint32_t i = 0; i < e->nargs; i++)
        if (uses(e->args[i], field))
            return 1;
    return 0;
}

int st_rules_when_uses(const st_default_rule *d, uint32_t field)
{
    return uses((const rexpr *)d->when, field);
}
