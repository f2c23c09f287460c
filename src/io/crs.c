/*
** io/crs.c -- placeholder until the PROJ-based CRS module lands.
*/
#include <string.h>
#include "ioInt.h"

st_status st_crs_to_wgs84(const char *source, const char *file, st_diags *diags,
                          st_crs_transform **out)
{
    (void)source;
    *out = NULL;
    st_loc loc = ST_LOC_FILE(file);
    return st_diags_add(diags, ST_SEV_ERROR, ST_ERR_PROJ, &loc, "reprojection is not built yet");
}
st_status st_crs_apply(st_crs_transform *t, double *xy, size_t n, size_t *failed)
{
    (void)t; (void)xy; (void)n; *failed = 0; return ST_OK;
}
const char *st_crs_name(const st_crs_transform *t) { (void)t; return "?"; }
void st_crs_free(st_crs_transform *t) { (void)t; }
int st_crs_is_wgs84(const char *def) { return strstr(def, "4326") || strstr(def, "CRS84"); }
char *st_crs_identify(const char *def) { return st_strdup(def); }
