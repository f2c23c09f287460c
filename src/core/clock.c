/*
** core/clock.c -- the time written into outputs (run_info, the
** GeoPackage's gpkg_contents.last_change).
**
** Input:   the clock, or the environment variable SOURCE_DATE_EPOCH (the
**          reproducible-builds convention: seconds since 1970-01-01 UTC).
** Output:  an ISO 8601 UTC timestamp. With SOURCE_DATE_EPOCH set to a
**          whole number, two runs on the same input give byte-identical
**          files (tests/e2e/test_jobs.sh relies on it).
** Errors:  a SOURCE_DATE_EPOCH that is not a whole number from 0 to
**          253402300799 (year 9999) is ignored: the clock is used.
*/
#include <stdio.h>
#include <stdlib.h>
#include <time.h>

#include "stocktake/core.h"

void st_timestamp(char *buf, size_t n, int millis)
{
    struct timespec now = {0, 0};
    const char *env = getenv("SOURCE_DATE_EPOCH");
    char *end = NULL;
    long long fixed = env && *env ? strtoll(env, &end, 10) : -1;
    if (env && *env && !*end && fixed >= 0 && fixed <= 253402300799LL)
        now.tv_sec = (time_t)fixed;
    else
        clock_gettime(CLOCK_REALTIME, &now);
    struct tm tmv;
    char day[32] = "";
    if (gmtime_r(&now.tv_sec, &tmv))
        strftime(day, sizeof day, "%Y-%m-%dT%H:%M:%S", &tmv);
    if (millis)
        snprintf(buf, n, "%s.%03ldZ", day, (long)(now.tv_nsec / 1000000));
    else
        snprintf(buf, n, "%sZ", day);
}
