/*
** core/file.c -- opening input files safely: only regular files are read.
**
** Input:   a path.
** Output:  a stdio stream in blocking mode, or NULL with errno.
** Errors:  errno from open/fstat/fdopen; EISDIR for a folder; EINVAL for a
**          FIFO, socket or device. A FIFO nobody writes would block open()
**          for ever, so the file is opened with O_NONBLOCK, checked with
**          fstat on that descriptor (no race with a rename), and only then
**          switched back to blocking reads.
*/
#include <errno.h>
#include <fcntl.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>

#include "stocktake/core.h"

FILE *st_fopen_regular(const char *path)
{
    int fd = open(path, O_RDONLY | O_NONBLOCK | O_CLOEXEC);
    if (fd < 0)
        return NULL;
    struct stat st;
    int err = 0;
    if (fstat(fd, &st) != 0)
        err = errno;
    else if (S_ISDIR(st.st_mode))
        err = EISDIR;
    else if (!S_ISREG(st.st_mode))
        err = EINVAL;
    int flags = err ? 0 : fcntl(fd, F_GETFL);
    if (!err && (flags < 0 || fcntl(fd, F_SETFL, flags & ~O_NONBLOCK) != 0))
        err = errno;
    FILE *fp = err ? NULL : fdopen(fd, "rb");
    if (!fp) {
        if (!err)
            err = errno;
        close(fd);
        errno = err;
    }
    return fp;
}

const char *st_open_error(int err)
{
    if (err == EINVAL)
        return "not a regular file (a FIFO or a device)";
    if (err == EISDIR)
        return "it is a folder";
    return strerror(err);
}
