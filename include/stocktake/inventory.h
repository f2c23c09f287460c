/*
** stocktake/inventory.h -- writing the curated inventory: the layers
** `buildings`, `set_aside`, `findings`, `run_info` and `unmapped` (and,
** once districts are placed, `districts`) into one GeoPackage, or into
** sibling files for single-layer formats (OUT.geojson,
** OUT.set_aside.geojson, OUT.findings.geojson, OUT.run_info.csv,
** OUT.unmapped.csv ...).
**
** source_id is the layer's own id (GeoJSON id, GeoPackage fid, Shapefile
** record number), or the feature's 0-based position in its layer when the
** layer has none.
**
** Column layout (docs/output.md):
**   buildings  bid layer source_id status area_m2 perimeter_m flags district
**              [<field> <field>_from <field>_rule]... then every source
**              attribute under its own name (src_<name> where it collides)
**   set_aside  bid layer source_id status reason duplicate_of, then the
**              source attributes; geometry as read
**   findings   bid code severity message; point geometry where known
**   run_info   key value
**   unmapped   field value count: source values no map line matched (and
**              values a derive rule could not read), most frequent first
** Nothing appears at the output path(s) before st_inventory_commit().
*/
#ifndef STOCKTAKE_INVENTORY_H
#define STOCKTAKE_INVENTORY_H

#include "stocktake/core.h"
#include "stocktake/feature.h"
#include "stocktake/finding.h"

typedef struct st_inventory st_inventory;

typedef struct st_inventory_layer {
    const char *name;          /* input layer name (borrowed) */
    const st_fields *fields;   /* its source fields (borrowed) */
} st_inventory_layer;

/*
** Open the inventory at 'path'. 'layers' (nlayers) describe the inputs;
** 'schema' names the rule schema's fields (nschema, may be 0). All borrowed
** and copied. *out NULL on failure, with a diagnostic.
*/
st_status st_inventory_open(const char *path, const st_inventory_layer *layers,
                            uint32_t nlayers, const char *const *schema,
                            uint32_t nschema, st_diags *diags,
                            st_inventory **out) ST_MUST_CHECK;

/* Kept buildings, in the order given; 'district_names' (indexed by
** f->district, may be NULL) names each building's district. */
st_status st_inventory_write_buildings(st_inventory *inv, st_feature *const *fs,
                                       size_t n, const char *const *district_names)
    ST_MUST_CHECK;
/* Set-aside features with their source geometry: 'source' (may be NULL)
** gives, per feature, the geometry as read when f->geom was replaced. */
st_status st_inventory_write_set_aside(st_inventory *inv, st_feature *const *fs,
                                       size_t n) ST_MUST_CHECK;
st_status st_inventory_write_findings(st_inventory *inv,
                                      const st_findings *findings) ST_MUST_CHECK;
/* Key/value pairs (2 * n strings, borrowed). */
st_status st_inventory_write_run_info(st_inventory *inv, const char *const *kv,
                                      size_t n) ST_MUST_CHECK;
/* The unmapped source values: n rows of 3 strings (field, value, count as
** decimal text), borrowed. Every run writes the table, empty without rules. */
st_status st_inventory_write_unmapped(st_inventory *inv, const char *const *rows,
                                      size_t n) ST_MUST_CHECK;
/* Rename every output into place. */
st_status st_inventory_commit(st_inventory *inv) ST_MUST_CHECK;
/* Close; without a commit every temporary output is removed. NULL ok. */
void st_inventory_close(st_inventory *inv);

/* The path a sibling layer gets for single-layer formats:
** returns owned "dir/name.<layer><ext>" (e.g. out.set_aside.geojson). */
char *st_inventory_sibling_path(const char *path, const char *layer);

#endif
