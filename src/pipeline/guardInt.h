/*
** pipeline/guardInt.h -- private to the pipeline: the checks a run makes
** before and while it reads (pipeline/guard.c).
*/
#ifndef STOCKTAKE_GUARD_INT_H
#define STOCKTAKE_GUARD_INT_H

#include <stdint.h>

#include "stocktake/feature.h"
#include "stocktake/pipeline.h"

/* Memory a run may still use: the limit and what the features read so far
** are estimated to need (see st_run_guard_feature). */
typedef struct st_memory_budget {
    uint64_t limit;     /* bytes */
    uint64_t used;      /* estimated bytes for what has been read */
} st_memory_budget;

/*
** Before anything is read: refuse an output path that names one of the
** inputs (or a sibling file the run writes that does, OUT.set_aside.EXT
** ...), and refuse inputs whose size alone says they need more memory than
** opt->max_memory (0: st_run_default_max_memory()). Sets up *budget.
** Returns ST_OK, or ST_ERR_USAGE / ST_ERR_LIMIT with one diagnostic.
*/
st_status st_run_guard_start(const st_run_options *opt, st_diags *diags,
                             st_memory_budget *budget) ST_MUST_CHECK;

/*
** After each feature read from 'path': add its estimated share of the
** run's peak memory to the budget; ST_ERR_LIMIT with a diagnostic naming
** the file and the feature when the budget is exceeded.
*/
st_status st_run_guard_feature(st_memory_budget *budget, const st_feature *f,
                               const char *path, st_diags *diags) ST_MUST_CHECK;

#endif
