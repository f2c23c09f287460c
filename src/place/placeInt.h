/*
** place/placeInt.h -- what the district loader (districts.c) and the
** placement (place.c) share: the layout of an st_districts set.
*/
#ifndef STOCKTAKE_PLACE_INT_H
#define STOCKTAKE_PLACE_INT_H

#include "stocktake/place.h"
#include "stocktake/strtab.h"

struct st_districts {
    st_district *items;      /* n districts, in the order their key was first read */
    size_t n, cap;
    const char **keys;       /* n borrowed pointers to items[i].key */
    st_strtab *index;        /* key -> district index */
    char *path;              /* owned */
    char *crs;               /* owned, as the reader named it ("" when none) */
    char *key_field;         /* owned */
    char *region_field;      /* owned or NULL */
    size_t nrepaired;
};

#endif
