/*
** stocktake/sha256.h -- SHA-256 (FIPS 180-4) of bytes and of files, so a
** report can name exactly which inputs and rule files a run read.
**
** None of the libraries stocktake links offers a hash, hence this small
** one; tests/unit/test_sha256.c checks it against the FIPS 180-2 example
** vectors and against sha256sum.
*/
#ifndef STOCKTAKE_SHA256_H
#define STOCKTAKE_SHA256_H

#include <stddef.h>
#include <stdint.h>
#include "stocktake/core.h"

typedef struct st_sha256 {
    uint32_t h[8];
    uint64_t bytes;        /* message length so far */
    uint8_t block[64];
    size_t fill;           /* bytes waiting in 'block' */
} st_sha256;

void st_sha256_init(st_sha256 *s);
void st_sha256_update(st_sha256 *s, const void *data, size_t n);
/* Finish: 32-byte digest into 'digest'; 's' must be re-initialised to reuse. */
void st_sha256_final(st_sha256 *s, uint8_t digest[32]);
/* Lower-case hex of the digest of data[0..n) into hex (65 bytes with NUL). */
void st_sha256_hex(const void *data, size_t n, char hex[65]);

/*
** Hash the file at 'path' (borrowed), reading it in blocks. On success
** hex holds 64 lower-case hex digits and *bytes the file size. On failure
** a diagnostic names the file and ST_ERR_IO is returned.
*/
st_status st_sha256_file(const char *path, char hex[65], uint64_t *bytes,
                         st_diags *diags) ST_MUST_CHECK;

#endif
