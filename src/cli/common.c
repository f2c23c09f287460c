/*
** cli/common.c -- what the subcommands share: diagnostics on stderr,
** a progress line, usage errors.
*/
#include <ctype.h>
#include <errno.h>
#include <signal.h>
#include <stdlib.h>
#include <stdarg.h>
#include <string.h>
#include <time.h>
#include <unistd.h>

#include "cli.h"

size_t st_cli_print_diags(const st_diags *d)
{
    st_buf b;
    st_buf_init(&b, 0);
    for (size_t i = 0; i < d->count; i++) {
        st_buf_clear(&b);
        if (!d->items[i].file && st_buf_puts(&b, "stocktake: ") != ST_OK)
            break;
        if (st_diag_render(&d->items[i], &b) != ST_OK)
            break;
        fputs(b.data, stderr);
    }
    if (d->dropped)
        fprintf(stderr, "stocktake: %zu more diagnostics not shown\n", d->dropped);
    st_buf_free(&b);
    return d->errors;
}

static volatile sig_atomic_t caught_signal;

static void on_signal(int sig)
{
    caught_signal = sig;
}

void st_cli_catch_interrupts(void)
{
    struct sigaction sa;
    memset(&sa, 0, sizeof sa);
    sa.sa_handler = on_signal;
    sigemptyset(&sa.sa_mask);
    static const int sigs[] = {SIGINT, SIGTERM, SIGHUP};
    for (size_t i = 0; i < sizeof sigs / sizeof sigs[0]; i++) {
        struct sigaction old;
        /* A signal ignored at start (nohup, a background job of a
        ** non-interactive shell) stays ignored, as the caller asked. */
        if (sigaction(sigs[i], NULL, &old) == 0 && old.sa_handler == SIG_IGN)
            continue;
        sigaction(sigs[i], &sa, NULL);
    }
}

const volatile sig_atomic_t *st_cli_interrupt_flag(void)
{
    return &caught_signal;
}

int st_cli_interrupted(void)
{
    return caught_signal;
}

void st_cli_reraise(void)
{
    int sig = caught_signal;
    if (!sig)
        return;
    signal(sig, SIG_DFL);
    raise(sig);
}

int st_cli_parse_size(const char *s, uint64_t *bytes)
{
    static const char units[] = "KMGT";
    char *end;
    errno = 0;
    double v = strtod(s, &end);
    if (end == s || errno || !(v > 0))
        return 0;
    double scale = 1;
    const char *u = strchr(units, toupper((unsigned char)*end));
    if (*end && u) {
        for (const char *k = units; k <= u; k++)
            scale *= 1024;
        end++;
        if (*end == 'i' || *end == 'I')
            end++;
    }
    if (*end == 'B' || *end == 'b')
        end++;
    if (*end || v * scale >= 18446744073709551615.0 || v * scale < 1)
        return 0;
    *bytes = (uint64_t)(v * scale);
    return 1;
}

int st_cli_usage_error(const char *cmd, const char *fmt, ...)
{
    va_list ap;
    fprintf(stderr, "stocktake %s: ", cmd);
    va_start(ap, fmt);
    vfprintf(stderr, fmt, ap);
    va_end(ap);
    fprintf(stderr, "\n(see 'stocktake %s --help')\n", cmd);
    return ST_EXIT_ERROR;
}

static double now_seconds(void)
{
    struct timespec ts;
    clock_gettime(CLOCK_MONOTONIC, &ts);
    return (double)ts.tv_sec + ts.tv_nsec / 1e9;
}

void st_progress_start(st_progress *p, const char *label, int quiet)
{
    p->active = !quiet && isatty(STDERR_FILENO);
    p->label = label;
    p->last = 0.0;
}

void st_progress_update(st_progress *p, long long done, long long total,
                        long long features)
{
    if (!p->active)
        return;
    double t = now_seconds();
    if (t - p->last < 0.2)
        return;
    p->last = t;
    if (total > 0)
        fprintf(stderr, "\r%s: %5.1f%%  %lld features", p->label,
                100.0 * (double)done / (double)total, features);
    else
        fprintf(stderr, "\r%s: %lld features", p->label, features);
    fflush(stderr);
}

void st_progress_end(st_progress *p)
{
    if (p->active)
        fprintf(stderr, "\r\033[K");
}
