/*
** tests/unit/scratch.h -- the scratch folder a unit test group writes its
** files in: made by mkdtemp under /tmp in the group's setup, removed with
** everything in it in the group's teardown.
*/
#ifndef STOCKTAKE_TEST_SCRATCH_H
#define STOCKTAKE_TEST_SCRATCH_H

#include <stdio.h>
#include <stdlib.h>

/* Remove 'dir' and what is in it: 0, or -1 when that failed (a teardown
** returns it, so cmocka reports a folder left behind). */
static inline int scratch_remove(const char *dir)
{
    char cmd[600];
    if (snprintf(cmd, sizeof cmd, "rm -rf '%s'", dir) >= (int)sizeof cmd)
        return -1;
    return system(cmd) == 0 ? 0 : -1;
}

#endif
