/*
** pipeline/pipelineInt.h -- private to the pipeline module.
*/
#ifndef STOCKTAKE_PIPELINE_INT_H
#define STOCKTAKE_PIPELINE_INT_H

#include "stocktake/footprint.h"
#include "stocktake/neighbours.h"
#include "stocktake/rules.h"

/*
** Carry a rule set's `footprint` block onto the two geometry stages'
** configurations. 'r' borrowed (NULL: nothing to do). An unknown name, a
** wrong unit or a value out of range is an ST_ERR_RULE diagnostic at the
** setting's file:line; the configurations are then partly set and the run
** must stop.
*/
st_status st_settings_apply(const st_rules *r, st_footprint_config *fc,
                            st_neighbours_config *nc, st_diags *diags) ST_MUST_CHECK;

#endif
