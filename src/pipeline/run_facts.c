/*
** pipeline/run_facts.c -- a part's layer facts (run --tile/--bbox
** --facts FILE; facts.h, docs/scale.md): the file loaded and matched to
** the inputs, each input checked unchanged before it is read, and the
** R-tree window a GeoPackage input with dense fids is read through.
**
** Errors:  a facts file that cannot be read or is damaged (facts.c), or
**          that does not describe these inputs as they are now: ST_ERR_FORMAT
**          naming the facts file, the input and what differs.
*/
#include <stdarg.h>
#include <stdio.h>
#include <string.h>

#include "stocktake/facts.h"
#include "stocktake/io.h"
#include "pipelineInt.h"

st_status st_run_facts_mismatch(run_state *s, size_t l, const char *fmt, ...)
{
    char why[512];
    va_list ap;
    va_start(ap, fmt);
    vsnprintf(why, sizeof why, fmt, ap);
    va_end(ap);
    st_loc loc = ST_LOC_FILE(s->opt->facts);
    return st_diags_add(s->diags, ST_SEV_ERROR, ST_ERR_FORMAT, &loc,
                        "input %zu (%s) is not the one these facts describe: %s; write the "
                        "facts again (stocktake tiles --facts)", l + 1, s->opt->inputs[l], why);
}

st_status st_run_facts_load(run_state *s)
{
    const st_run_options *o = s->opt;
    if (!o->facts)
        return ST_OK;
    if (!s->window)
        return st_diags_add(s->diags, ST_SEV_ERROR, ST_ERR_USAGE, NULL,
                            "--facts goes with --tile or --bbox");
    if (!(s->facts = st_calloc(1, sizeof *s->facts)))
        return ST_ERR_NOMEM;
    st_status rc = st_facts_read(o->facts, s->facts, s->diags);
    if (rc != ST_OK)
        return rc;
    st_loc loc = ST_LOC_FILE(o->facts);
    if (s->facts->n != o->ninputs)
        return st_diags_add(s->diags, ST_SEV_ERROR, ST_ERR_FORMAT, &loc,
                            "the facts describe %zu input layers, the run has %zu",
                            s->facts->n, o->ninputs);
    for (size_t l = 0; l < o->ninputs; l++)
        if (strcmp(s->facts->layers[l].spec, o->inputs[l]) != 0)
            return st_run_facts_mismatch(s, l, "the facts name '%s' in its place",
                                         s->facts->layers[l].spec);
    return ST_OK;
}

st_status st_run_facts_check_input(run_state *s, size_t l, const st_reader *r)
{
    const st_facts_layer *given = &s->facts->layers[l];
    st_facts_layer now;
    memset(&now, 0, sizeof now);
    now.file = (char *)st_reader_path(r);   /* borrowed: not freed below */
    if (strcmp(given->file, now.file) != 0)
        return st_run_facts_mismatch(s, l, "it names the file '%s', the facts '%s'", now.file,
                                     given->file);
    st_status rc = st_facts_stat(&now, s->diags);
    if (rc != ST_OK)
        return rc;
    if (now.size != given->size || now.mtime_s != given->mtime_s ||
        now.mtime_ns != given->mtime_ns)
        return st_run_facts_mismatch(s, l, "it changed since the facts were written (%lld "
                                     "bytes, modified at %lld.%09lld s; the facts say %lld "
                                     "bytes at %lld.%09lld s)", now.size, now.mtime_s,
                                     now.mtime_ns, given->size, given->mtime_s,
                                     given->mtime_ns);
    if (strcmp(given->format, st_reader_format_name(r)) != 0 ||
        strcmp(given->name, st_reader_layer_name(r)) != 0)
        return st_run_facts_mismatch(s, l, "it is the %s layer '%s', the facts say the %s "
                                     "layer '%s'", st_reader_format_name(r),
                                     st_reader_layer_name(r), given->format, given->name);
    const char *crs = st_reader_crs(r) ? st_reader_crs(r) : "";
    if (strcmp(given->crs, crs) != 0)
        return st_run_facts_mismatch(s, l, "it is read from the CRS '%s', the facts from '%s' "
                                     "(give 'stocktake tiles' the same --crs)", crs,
                                     given->crs);
    return ST_OK;
}

int st_run_facts_window(const run_state *s, const st_facts_layer *given, st_read_window *w)
{
    if (!s->window || !given || !given->dense || strcmp(given->format, "gpkg") != 0)
        return 0;
    memset(w, 0, sizeof *w);
    const double *r = s->read_box;
    /* a feature is within reach when its box, or its box with the axes
    ** swapped, meets the read box (run_read.c in_reach): the second is
    ** its box meeting the read box swapped */
    double swapped[4] = {r[1], r[0], r[3], r[2]};
    memcpy(w->box[0], r, sizeof w->box[0]);
    memcpy(w->box[1], swapped, sizeof w->box[1]);
    w->nbox = 2;
    w->fid_min = given->fid_min;
    w->count = given->count;
    w->always = given->coordless;
    w->nalways = given->ncoordless;
    return 1;
}
