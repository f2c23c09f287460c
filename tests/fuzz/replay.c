/*
** tests/fuzz/replay.c -- a plain driver for the fuzz targets, so their
** corpora and every crasher found run as ordinary tests with gcc (and under
** ASan/UBSan with `make check SANITIZE=1`), no libFuzzer needed.
**
** Usage:   replay_<target> FILE_OR_DIR...
**          Each file is passed to LLVMFuzzerTestOneInput once; a folder
**          means every regular file in it (not recursive), in name order.
** Output:  one line per failure; at the end "<target>: N inputs replayed".
**          A broken invariant aborts (the harness's own check), which the
**          caller sees as a failing exit status.
** Errors:  an unreadable file or folder is exit 2.
*/
#include <dirent.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size);

static int replay_file(const char *path)
{
    FILE *fp = fopen(path, "rb");
    if (!fp) {
        perror(path);
        return -1;
    }
    size_t cap = 1 << 16, n = 0;
    uint8_t *buf = malloc(cap);
    size_t got;
    while (buf && (got = fread(buf + n, 1, cap - n, fp)) > 0) {
        n += got;
        if (n == cap) {
            uint8_t *b = realloc(buf, cap *= 2);
            if (!b) {
                free(buf);
                buf = NULL;
            } else
                buf = b;
        }
    }
    fclose(fp);
    if (!buf) {
        fprintf(stderr, "%s: out of memory\n", path);
        return -1;
    }
    LLVMFuzzerTestOneInput(buf, n);
    free(buf);
    return 1;
}

static int by_name(const void *a, const void *b)
{
    return strcmp(*(char *const *)a, *(char *const *)b);
}

static int replay_dir(const char *dir)
{
    DIR *d = opendir(dir);
    if (!d) {
        perror(dir);
        return -1;
    }
    char **names = NULL;
    size_t n = 0, cap = 0;
    struct dirent *e;
    while ((e = readdir(d)) != NULL) {
        if (e->d_name[0] == '.')
            continue;
        if (n == cap) {
            char **a = realloc(names, (cap = cap ? cap * 2 : 64) * sizeof *a);
            if (!a)
                break;
            names = a;
        }
        names[n++] = strdup(e->d_name);
    }
    closedir(d);
    qsort(names, n, sizeof *names, by_name);
    int count = 0;
    for (size_t i = 0; i < n; i++) {
        char path[4096];
        struct stat st;
        snprintf(path, sizeof path, "%s/%s", dir, names[i]);
        if (stat(path, &st) == 0 && S_ISREG(st.st_mode)) {
            int r = replay_file(path);
            if (r < 0)
                count = -1;
            else if (count >= 0)
                count += r;
        }
        free(names[i]);
    }
    free(names);
    return count;
}

int main(int argc, char **argv)
{
    const char *target = strrchr(argv[0], '/') ? strrchr(argv[0], '/') + 1 : argv[0];
    long total = 0;
    for (int i = 1; i < argc; i++) {
        struct stat st;
        if (stat(argv[i], &st) != 0) {
            perror(argv[i]);
            return 2;
        }
        int r = S_ISDIR(st.st_mode) ? replay_dir(argv[i]) : replay_file(argv[i]);
        if (r < 0)
            return 2;
        total += r;
    }
    printf("%s: %ld inputs replayed\n", target, total);
    return 0;
}
