/*
** tests/unit/test_csv.c -- the CSV writer (io/csv.c): RFC 4180 quoting of
** commas, quotes, line breaks and blanks, UTF-8 text, the wkt column and
** its name clash, the temporary file, allocation failures.
**
** The exact bytes are checked against RFC 4180 section 2 by hand, and the
** file is read back with libcsv's own parser (csv_parse), which must give
** every value unchanged.
*/
#include <dirent.h>
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>
#include <cmocka.h>

#include <csv.h>

#include "stocktake/core.h"
#include "stocktake/feature.h"
#include "stocktake/io.h"

typedef struct fixture {
    char dir[64];
    char path[128];
} fixture;

static int setup(void **state)
{
    fixture *fx = calloc(1, sizeof *fx);
    if (!fx)
        return -1;
    strcpy(fx->dir, "/tmp/st_test_csv_XXXXXX");
    if (!mkdtemp(fx->dir))
        return -1;
    snprintf(fx->path, sizeof fx->path, "%s/out.csv", fx->dir);
    *state = fx;
    return 0;
}

/* Number of entries in the fixture folder besides . and .. */
static int files_in(const char *dir)
{
    DIR *d = opendir(dir);
    int n = 0;
    for (struct dirent *e; d && (e = readdir(d));)
        if (strcmp(e->d_name, ".") && strcmp(e->d_name, ".."))
            n++;
    if (d)
        closedir(d);
    return n;
}

static int teardown(void **state)
{
    fixture *fx = *state;
    remove(fx->path);
    rmdir(fx->dir);
    free(fx);
    return 0;
}

static char *slurp(const char *path, size_t *n)
{
    FILE *fp = fopen(path, "rb");
    assert_non_null(fp);
    static char text[8192];
    *n = fread(text, 1, sizeof text - 1, fp);
    text[*n] = '\0';
    fclose(fp);
    return text;
}

static void add_feature(st_writer *w, uint64_t index, const char *const *values,
                        uint32_t n, int with_polygon)
{
    st_feature *f = st_feature_new();
    assert_non_null(f);
    f->index = index;
    for (uint32_t i = 0; i < n; i++)
        assert_int_equal(st_feature_set_value(f, i, values[i],
                                              values[i] ? strlen(values[i]) : 0), ST_OK);
    if (with_polygon) {
        /* A square with a square hole (lon/lat). */
        static const double shell[] = {0, 0, 10, 0, 10, 10, 0, 10, 0, 0};
        static const double hole[] = {2, 2, 2, 4, 4, 4, 4, 2, 2, 2};
        f->geom.type = ST_GEOM_POLYGON;
        assert_int_equal(st_geom_begin_part(&f->geom), ST_OK);
        assert_int_equal(st_geom_begin_ring(&f->geom), ST_OK);
        for (int k = 0; k < 10; k += 2)
            assert_int_equal(st_geom_add_xy(&f->geom, shell[k], shell[k + 1]), ST_OK);
        assert_int_equal(st_geom_begin_ring(&f->geom), ST_OK);
        for (int k = 0; k < 10; k += 2)
            assert_int_equal(st_geom_add_xy(&f->geom, hole[k], hole[k + 1]), ST_OK);
    }
    assert_int_equal(st_writer_write(w, f), ST_OK);
    st_feature_free(f);
}

static st_fields three_fields(void)
{
    st_fields fields;
    st_fields_init(&fields);
    assert_int_equal(st_fields_add(&fields, "name", ST_FIELD_TEXT, 0, 0, NULL), ST_OK);
    assert_int_equal(st_fields_add(&fields, "note, long", ST_FIELD_TEXT, 0, 0, NULL), ST_OK);
    assert_int_equal(st_fields_add(&fields, "WKT", ST_FIELD_TEXT, 0, 0, NULL), ST_OK);
    return fields;
}

/* Expected file, written out by hand from RFC 4180 section 2: CRLF record
** ends (rule 2), quotes only where a field holds a comma, quote or line
** break (rule 6; we also quote leading/trailing blanks), inner quotes
** doubled (rule 7). The source field "WKT" clashes with our geometry
** column and becomes src_wkt. */
static const char expected_csv[] =
    "name,\"note, long\",src_wkt,wkt\r\n"
    "plain,\"a, b\",\"say \"\"hi\"\"\",\"POLYGON ((0 0, 10 0, 10 10, 0 10, 0 0), "
    "(2 2, 2 4, 4 4, 4 2, 2 2))\"\r\n"
    "\"two\nlines\",Ярославская улица,São Brás,\r\n"
    ",,\" padded \",\r\n"
    "bad\xEF\xBF\xBD" "byte,,,\r\n";

static const char *const rows[][3] = {
    {"plain", "a, b", "say \"hi\""},
    {"two\nlines", "Ярославская улица", "São Brás"},
    {NULL, "", " padded "},
    {"bad\xFF" "byte", NULL, NULL},
};

static void write_sample(const char *path, const char **notes_out)
{
    st_diags d;
    st_diags_init(&d);
    st_writer *w = NULL;
    assert_int_equal(st_writer_open(path, &d, &w), ST_OK);
    st_fields fields = three_fields();
    assert_int_equal(st_writer_begin_layer(w, "layer", &fields, ST_GEOM_POLYGON), ST_OK);
    for (uint64_t i = 0; i < 4; i++)
        add_feature(w, i, rows[i], 3, i == 0);
    assert_int_equal(st_writer_end_layer(w), ST_OK);
    assert_int_equal(st_writer_commit(w), ST_OK);
    static char notes[256];
    snprintf(notes, sizeof notes, "%s", st_writer_notes(w) ? st_writer_notes(w) : "");
    *notes_out = notes;
    st_writer_close(w);
    st_fields_free(&fields);
    assert_int_equal(d.count, 0);
    st_diags_free(&d);
}

static void test_exact_bytes(void **state)
{
    fixture *fx = *state;
    const char *notes;
    write_sample(fx->path, &notes);
    size_t n;
    char *text = slurp(fx->path, &n);
    assert_int_equal(n, strlen(expected_csv));
    assert_string_equal(text, expected_csv);
    assert_string_equal(notes, "WKT -> src_wkt\n");
    assert_int_equal(files_in(fx->dir), 1);   /* no temporary file left */
}

/* ---- read back with libcsv's parser ------------------------------------ */

typedef struct parsed {
    char cell[8][6][128];
    int row, col;
} parsed;

static void on_field(void *s, size_t n, void *data)
{
    parsed *p = data;
    if (p->row < 8 && p->col < 6 && n < 128) {
        memcpy(p->cell[p->row][p->col], s, n);
        p->cell[p->row][p->col][n] = '\0';
    }
    p->col++;
}

static void on_row(int c, void *data)
{
    (void)c;
    parsed *p = data;
    assert_int_equal(p->col, 4);   /* every record has all four columns */
    p->row++;
    p->col = 0;
}

static void test_libcsv_reads_back_every_value(void **state)
{
    fixture *fx = *state;
    const char *notes;
    write_sample(fx->path, &notes);
    size_t n;
    char *text = slurp(fx->path, &n);
    struct csv_parser parser;
    assert_int_equal(csv_init(&parser, CSV_STRICT | CSV_STRICT_FINI), 0);
    static parsed p;
    memset(&p, 0, sizeof p);
    assert_int_equal(csv_parse(&parser, text, n, on_field, on_row, &p), n);
    assert_int_equal(csv_fini(&parser, on_field, on_row, &p), 0);
    csv_free(&parser);
    assert_int_equal(p.row, 5);
    assert_string_equal(p.cell[0][3], "wkt");
    for (int r = 0; r < 3; r++)
        for (int c = 0; c < 3; c++)
            assert_string_equal(p.cell[r + 1][c], rows[r][c] ? rows[r][c] : "");
    assert_string_equal(p.cell[4][0], "bad\xEF\xBF\xBD" "byte");
    assert_non_null(strstr(p.cell[1][3], "POLYGON (("));
    assert_string_equal(p.cell[2][3], "");   /* null geometry: empty */
}

/* A layer declared without geometry has no wkt column, and a field that
** merely contains "wkt" keeps its name. */
static void test_attribute_table(void **state)
{
    fixture *fx = *state;
    st_diags d;
    st_diags_init(&d);
    st_writer *w = NULL;
    assert_int_equal(st_writer_open(fx->path, &d, &w), ST_OK);
    st_fields fields;
    st_fields_init(&fields);
    assert_int_equal(st_fields_add(&fields, "wkt_source", ST_FIELD_TEXT, 0, 0, NULL), ST_OK);
    assert_int_equal(st_writer_begin_layer(w, "t", &fields, ST_GEOM_NULL), ST_OK);
    const char *v[] = {"x"};
    add_feature(w, 0, v, 1, 1);
    assert_int_equal(st_writer_commit(w), ST_OK);
    assert_null(st_writer_notes(w));
    st_writer_close(w);
    st_fields_free(&fields);
    st_diags_free(&d);
    size_t n;
    assert_string_equal(slurp(fx->path, &n), "wkt_source\r\nx\r\n");
}

/* Closed without commit: nothing at the path, no temporary file left. */
static void test_no_commit_leaves_nothing(void **state)
{
    fixture *fx = *state;
    st_diags d;
    st_diags_init(&d);
    st_writer *w = NULL;
    assert_int_equal(st_writer_open(fx->path, &d, &w), ST_OK);
    st_fields fields = three_fields();
    assert_int_equal(st_writer_begin_layer(w, "layer", &fields, ST_GEOM_POLYGON), ST_OK);
    add_feature(w, 0, rows[0], 3, 1);
    assert_int_equal(files_in(fx->dir), 1);   /* the temporary file */
    st_writer_close(w);
    assert_int_equal(files_in(fx->dir), 0);
    st_fields_free(&fields);
    st_diags_free(&d);
}

/* A folder that does not exist: ST_ERR_IO naming the output. */
static void test_unwritable(void **state)
{
    (void)state;
    st_diags d;
    st_diags_init(&d);
    st_writer *w = (st_writer *)&d;
    assert_int_equal(st_writer_open("/nonexistent-st-dir/out.csv", &d, &w), ST_ERR_IO);
    assert_null(w);
    assert_int_equal(d.errors, 1);
    assert_string_equal(d.items[0].file, "/nonexistent-st-dir/out.csv");
    st_diags_free(&d);
}

/* A second layer is refused: CSV holds one. */
static void test_one_layer_only(void **state)
{
    fixture *fx = *state;
    st_diags d;
    st_diags_init(&d);
    st_writer *w = NULL;
    assert_int_equal(st_writer_open(fx->path, &d, &w), ST_OK);
    st_fields fields = three_fields();
    assert_int_equal(st_writer_begin_layer(w, "a", &fields, ST_GEOM_POLYGON), ST_OK);
    assert_int_equal(st_writer_end_layer(w), ST_OK);
    assert_int_equal(st_writer_begin_layer(w, "b", &fields, ST_GEOM_POLYGON), ST_ERR_USAGE);
    st_writer_close(w);
    st_fields_free(&fields);
    st_diags_free(&d);
}

/* Each allocation failing in turn: an error status, never a crash, and
** no file left behind (leaks show under valgrind / ASan). */
static void test_alloc_failures(void **state)
{
    fixture *fx = *state;
    st_fields fields = three_fields();
    for (long k = 1; k < 500; k++) {
        st_diags d;
        st_diags_init(&d);
        st_writer *w = NULL;
        st_alloc_fail_after(k);
        st_status rc = st_writer_open(fx->path, &d, &w);
        if (rc == ST_OK)
            rc = st_writer_begin_layer(w, "layer", &fields, ST_GEOM_POLYGON);
        for (int i = 0; rc == ST_OK && i < 4; i++) {
            st_feature f;
            memset(&f, 0, sizeof f);
            f.values = (char **)rows[i];
            f.nvalues = 3;
            rc = st_writer_write(w, &f);
        }
        if (rc == ST_OK)
            rc = st_writer_commit(w);
        long used = st_alloc_count();
        st_alloc_fail_after(0);
        st_writer_close(w);
        st_diags_free(&d);
        if (rc == ST_OK) {
            if (used >= k) fail_msg("k=%ld used=%ld", k, used);
            st_fields_free(&fields);
            assert_int_equal(files_in(fx->dir), 1);
            return;
        }
        assert_int_equal(rc, ST_ERR_NOMEM);
        assert_int_equal(files_in(fx->dir), 0);
    }
    fail_msg("the writer never finished");
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test_setup_teardown(test_exact_bytes, setup, teardown),
        cmocka_unit_test_setup_teardown(test_libcsv_reads_back_every_value, setup, teardown),
        cmocka_unit_test_setup_teardown(test_attribute_table, setup, teardown),
        cmocka_unit_test_setup_teardown(test_no_commit_leaves_nothing, setup, teardown),
        cmocka_unit_test_setup_teardown(test_unwritable, setup, teardown),
        cmocka_unit_test_setup_teardown(test_one_layer_only, setup, teardown),
        cmocka_unit_test_setup_teardown(test_alloc_failures, setup, teardown),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
