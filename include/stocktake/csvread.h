/*
** stocktake/csvread.h -- reading a small CSV table (defaults tables,
** reference counts) row by row with the line each row ends on, so every
** complaint about it can name "file:line".
**
** Input:   a UTF-8 text file, RFC 4180 (libcsv in strict mode: a stray
**          quote is an error); a leading byte-order mark is skipped; blank
**          lines are skipped; spaces around unquoted cells are trimmed.
** Output:  one callback per row with its cells (borrowed for the call).
** Errors:  ST_ERR_IO (cannot read), ST_ERR_FORMAT (bad CSV, not UTF-8),
**          ST_ERR_LIMIT (see below), each with a diagnostic "file:line:";
**          whatever the callback returns stops the reading.
** Limits:  'max_bytes' of file, ST_CSV_MAX_COLUMNS cells a row,
**          ST_CSV_MAX_CELL bytes a cell.
*/
#ifndef STOCKTAKE_CSVREAD_H
#define STOCKTAKE_CSVREAD_H

#include <stddef.h>

#include "stocktake/core.h"

#define ST_CSV_MAX_COLUMNS 256
#define ST_CSV_MAX_CELL 4096

/* Called once per row: 'cells' (n entries, NUL-terminated, borrowed for the
** call) and the 1-based line the row ends on. Return ST_OK to go on. */
typedef st_status (*st_csv_row_fn)(void *ud, long line, char *const *cells, size_t n);

/*
** Read the CSV file 'path' (borrowed), calling 'row' for each row,
** including the header row. On failure a diagnostic naming the file and
** line is added (the callback adds its own).
*/
st_status st_csv_read(const char *path, size_t max_bytes, st_csv_row_fn row, void *ud,
                      st_diags *diags) ST_MUST_CHECK;

#endif
