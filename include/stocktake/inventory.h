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
**   set_aside  bid layer source_id status reason duplicate_of district,
**              then the source attributes; geometry as read
**   findings   bid code severity message; point geometry where known
**   run_info   key value
**   districts  district region buildings repaired duplicate rejected
**              footprint_m2 floor_m2 floor_known expected ratio reference
**              findings_error findings_warning findings_note polygon_repair
**              [<field>_source _derived _default _drawn _unknown]... (shares
**              of the district's buildings, 0..1); the district polygon;
**              one row per district of the audit, "none" last (no polygon)
**   unmapped   field value count: source values no map line matched (and
**              values a derive rule could not read), most frequent first
** Nothing appears at the output path(s) before st_inventory_commit().
*/
#ifndef STOCKTAKE_INVENTORY_H
#define STOCKTAKE_INVENTORY_H

#include "stocktake/audit.h"
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

/* Threads that prepare the rows of the buildings, set_aside, findings and
** districts layers of a GeoPackage (blob encoding, numbers) while one
** thread inserts them: 0 or 1 none. The file is the same for any number. */
void st_inventory_set_threads(st_inventory *inv, unsigned nthreads);
/* Kept buildings, in the order given; 'district_names' (indexed by
** f->district, may be NULL) names each building's district. */
st_status st_inventory_write_buildings(st_inventory *inv, st_feature *const *fs,
                                       size_t n, const char *const *district_names)
    ST_MUST_CHECK;
/* Set-aside features with the geometry as read (f->source_geom when a
** stage replaced f->geom); 'district_names' as for buildings: the district
** the placement found for the feature's footprint, "none" without one. */
st_status st_inventory_write_set_aside(st_inventory *inv, st_feature *const *fs,
                                       size_t n, const char *const *district_names)
    ST_MUST_CHECK;
st_status st_inventory_write_findings(st_inventory *inv,
                                      const st_findings *findings) ST_MUST_CHECK;
/* Key/value pairs (2 * n strings, borrowed). */
st_status st_inventory_write_run_info(st_inventory *inv, const char *const *kv,
                                      size_t n) ST_MUST_CHECK;
/* The unmapped source values: n rows of 3 strings (field, value, count as
** decimal text), borrowed. Every run writes the table, empty without rules. */
st_status st_inventory_write_unmapped(st_inventory *inv, const char *const *rows,
                                      size_t n) ST_MUST_CHECK;
/* The `districts` layer from the audit (borrowed): one row per district in
** the audit's order (audit.h). For single-layer formats it goes to the
** sibling OUT.districts.EXT. */
st_status st_inventory_write_districts(st_inventory *inv, const st_audit *a) ST_MUST_CHECK;
/* Rename every output into place. */
st_status st_inventory_commit(st_inventory *inv) ST_MUST_CHECK;
/* Close; without a commit every temporary output is removed. NULL ok. */
void st_inventory_close(st_inventory *inv);

/* The path a sibling layer gets for single-layer formats:
** returns owned "dir/name.<layer><ext>" (e.g. out.set_aside.geojson). */
char *st_inventory_sibling_path(const char *path, const char *layer);

#endif
