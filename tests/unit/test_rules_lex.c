/*
** tests/unit/test_rules_lex.c -- the rule lexer: token kinds, spans,
** numbers, strings, regexes against division, names with ':' and '-',
** comments, error tokens; and the text helpers (folding, numbers in
** attribute values, edit distance, year).
*/
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <math.h>
#include <string.h>
#include <cmocka.h>

#include "rules/rulesInt.h"

typedef struct lexfix {
    st_rules R;
    rsource src;
    rlexer lx;
    st_diags diags;
} lexfix;

static void lex_open(lexfix *x, const char *text)
{
    memset(x, 0, sizeof *x);
    st_arena_init(&x->R.arena);
    st_diags_init(&x->diags);
    x->R.diags = &x->diags;
    x->src.name = (char *)"t.rules";
    x->src.text = (char *)text;
    x->src.len = strlen(text);
    x->R.sources = &x->src;
    x->R.nsources = 1;
    st_rlex_init(&x->lx, &x->R, 0);
}

static void lex_close(lexfix *x)
{
    st_arena_free(&x->R.arena);
    st_diags_free(&x->diags);
}

static rtok next(lexfix *x)
{
    rtok t;
    assert_int_equal(st_rlex_next(&x->lx, &t), ST_OK);
    return t;
}

static void expect_tok(lexfix *x, rtok_type type, const char *text, uint32_t line, uint32_t col)
{
    rtok t = next(x);
    assert_int_equal(t.type, type);
    if (text) {
        assert_int_equal(t.tlen, strlen(text));
        assert_memory_equal(t.text, text, t.tlen);
    }
    assert_int_equal(t.span.line, line);
    assert_int_equal(t.span.col, col);
}

static void test_names_and_punctuation(void **state)
{
    (void)state;
    lexfix x;
    lex_open(&x, "map occupancy from building:levels, min-area -> RES # note\n  x != 3..4\n");
    expect_tok(&x, T_NAME, "map", 1, 1);
    expect_tok(&x, T_NAME, "occupancy", 1, 5);
    expect_tok(&x, T_NAME, "from", 1, 15);
    expect_tok(&x, T_NAME, "building:levels", 1, 20);
    expect_tok(&x, T_COMMA, ",", 1, 35);
    expect_tok(&x, T_NAME, "min-area", 1, 37);
    expect_tok(&x, T_ARROW, "->", 1, 46);
    expect_tok(&x, T_NAME, "RES", 1, 49);
    expect_tok(&x, T_NL, NULL, 1, 59);
    expect_tok(&x, T_NAME, "x", 2, 3);
    expect_tok(&x, T_NE, "!=", 2, 5);
    rtok t = next(&x);
    assert_int_equal(t.type, T_NUMBER);
    assert_true(t.num == 3.0);
    expect_tok(&x, T_DOTDOT, "..", 2, 9);
    t = next(&x);
    assert_int_equal(t.type, T_NUMBER);
    assert_true(t.num == 4.0);
    expect_tok(&x, T_NL, NULL, 2, 12);
    assert_int_equal(next(&x).type, T_EOF);
    lex_close(&x);
}

static void test_numbers(void **state)
{
    (void)state;
    lexfix x;
    lex_open(&x, "3.25 9.6/3.2 70%");
    rtok t = next(&x);
    assert_int_equal(t.type, T_NUMBER);
    assert_true(t.num == 3.25);
    t = next(&x);
    assert_true(t.num == 9.6);
    assert_int_equal(next(&x).type, T_SLASH);   /* after an operand: division */
    t = next(&x);
    assert_true(t.num == 3.2);
    t = next(&x);
    assert_true(t.num == 70.0);
    assert_int_equal(next(&x).type, T_PERCENT);
    lex_close(&x);
}

static void test_strings(void **state)
{
    (void)state;
    lexfix x;
    lex_open(&x, "\"R\\u00e9s \\\"a\\\" \\\\\" \"Résidentiel\"");
    rtok t = next(&x);
    assert_int_equal(t.type, T_STRING);
    assert_string_equal(t.text, "Ru00e9s \"a\" \\");
    assert_int_equal(t.span.len, 19);
    t = next(&x);
    assert_int_equal(t.type, T_STRING);
    assert_string_equal(t.text, "R\xC3\xA9sidentiel");
    lex_close(&x);
}

static void test_regex_versus_division(void **state)
{
    (void)state;
    lexfix x;
    lex_open(&x, "/^(shop|office)s?$/i, /a\\/b/ -> X\n(a) / 2\n");
    rtok t = next(&x);
    assert_int_equal(t.type, T_REGEX);
    assert_string_equal(t.text, "^(shop|office)s?$");
    assert_int_equal(t.caseless, 1);
    assert_int_equal(t.span.len, 20);
    assert_int_equal(next(&x).type, T_COMMA);
    t = next(&x);
    assert_int_equal(t.type, T_REGEX);
    assert_string_equal(t.text, "a/b");     /* \/ is a slash */
    assert_int_equal(t.caseless, 0);
    assert_int_equal(next(&x).type, T_ARROW);
    assert_int_equal(next(&x).type, T_NAME);
    assert_int_equal(next(&x).type, T_NL);
    assert_int_equal(next(&x).type, T_LPAREN);
    assert_int_equal(next(&x).type, T_NAME);
    assert_int_equal(next(&x).type, T_RPAREN);
    assert_int_equal(next(&x).type, T_SLASH);
    lex_close(&x);
}

static void test_error_tokens(void **state)
{
    (void)state;
    lexfix x;
    lex_open(&x, "\"open\n/open\n/x/g\n@\n");
    rtok t = next(&x);
    assert_int_equal(t.type, T_ERROR);
    assert_string_equal(t.text, "string is not closed before the end of the line");
    assert_int_equal(next(&x).type, T_NL);
    t = next(&x);
    assert_int_equal(t.type, T_ERROR);
    assert_int_equal(t.span.line, 2);
    assert_int_equal(next(&x).type, T_NL);
    t = next(&x);
    assert_int_equal(t.type, T_ERROR);
    assert_int_equal(t.span.col, 4);
    assert_int_equal(next(&x).type, T_NL);
    t = next(&x);
    assert_int_equal(t.type, T_ERROR);
    assert_string_equal(t.text, "unexpected character");
    lex_close(&x);
}

static void test_token_limit(void **state)
{
    (void)state;
    static char text[ST_RULES_MAX_TOKEN + 8];
    memset(text, 'a', ST_RULES_MAX_TOKEN + 1);
    text[ST_RULES_MAX_TOKEN + 1] = '\0';
    lexfix x;
    lex_open(&x, text);
    rtok t = next(&x);
    assert_int_equal(t.type, T_ERROR);
    assert_string_equal(t.text, "name is longer than the limit of 4096 bytes");
    lex_close(&x);
}

static void test_eof_points_at_last_line(void **state)
{
    (void)state;
    lexfix x;
    lex_open(&x, "map\n  ab\n");
    next(&x);
    next(&x);
    next(&x);
    next(&x);
    rtok t = next(&x);
    assert_int_equal(t.type, T_EOF);
    assert_int_equal(t.span.line, 2);
    assert_int_equal(t.span.col, 5);
    lex_close(&x);
}

/* ---- text helpers ------------------------------------------------------ */

static char *folded(const char *s, unsigned fold)
{
    st_buf b;
    st_buf_init(&b, 0);
    assert_int_equal(st_rtext_fold(s, strlen(s), fold, &b), ST_OK);
    return st_buf_take(&b);
}

static void expect_fold(const char *in, unsigned fold, const char *want)
{
    char *got = folded(in, fold);
    assert_string_equal(got, want);
    st_free(got);
}

static void test_fold(void **state)
{
    (void)state;
    /* Latin-1 Supplement */
    expect_fold("R\xC3\xA9sidentiel", FOLD_CASE | FOLD_ACCENTS, "residentiel");
    expect_fold("R\xC3\x89SIDENTIEL", FOLD_CASE, "r\xC3\xA9sidentiel");
    expect_fold("\xC3\x86gir \xC3\x9F", FOLD_ACCENTS, "AEgir ss");
    /* Latin Extended-A: Ł ő Š Ž Œ */
    expect_fold("\xC5\x81\xC3\xB3" "d\xC5\xBA", FOLD_CASE | FOLD_ACCENTS, "lodz");
    expect_fold("\xC5\xA0KODA", FOLD_CASE, "\xC5\xA1koda");
    expect_fold("\xC5\x92UVRE", FOLD_CASE | FOLD_ACCENTS, "oeuvre");
    expect_fold("\xC4\xB0stanbul", FOLD_CASE, "istanbul");
    /* Cyrillic: ДОМ -> дом; Ёлка -> елка with accents folded */
    expect_fold("\xD0\x94\xD0\x9E\xD0\x9C", FOLD_CASE, "\xD0\xB4\xD0\xBE\xD0\xBC");
    expect_fold("\xD0\x81\xD0\xBB\xD0\xBA\xD0\xB0", FOLD_CASE | FOLD_ACCENTS,
                "\xD0\xB5\xD0\xBB\xD0\xBA\xD0\xB0");
    expect_fold("\xD0\x8E", FOLD_CASE, "\xD1\x9E"); /* Ў -> ў */
    /* Greek: ΣΧΟΛΕΊΟ -> σχολειο (accents) */
    expect_fold("\xCE\xA3\xCE\xA7\xCE\x9F\xCE\x9B\xCE\x95\xCE\x8A\xCE\x9F",
                FOLD_CASE | FOLD_ACCENTS,
                "\xCF\x83\xCF\x87\xCE\xBF\xCE\xBB\xCE\xB5\xCE\xB9\xCE\xBF");
    /* combining acute (NFD) dropped; invalid byte kept */
    expect_fold("e\xCC\x81" "cole\xFF", FOLD_ACCENTS, "ecole\xFF");
    /* outside the covered blocks: unchanged */
    expect_fold("\xE0\xA4\xA8", FOLD_CASE | FOLD_ACCENTS, "\xE0\xA4\xA8");
}

static void expect_number(const char *s, unsigned accept, double want)
{
    double got = -1;
    assert_int_equal(st_rtext_number(s, strlen(s), accept, &got), 1);
    assert_true(fabs(got - want) < 1e-12);
}

static void expect_not_number(const char *s, unsigned accept)
{
    double got;
    assert_int_equal(st_rtext_number(s, strlen(s), accept, &got), 0);
}

static void test_numbers_in_values(void **state)
{
    (void)state;
    expect_number("4", 0, 4);
    expect_number(" 4.5 ", 0, 4.5);
    expect_number("9 m", 0, 9);
    expect_number("9m", 0, 9);
    expect_number("30 ft", 0, 30 * 0.3048);   /* 1 ft = 0.3048 m exactly */
    expect_number("30'", 0, 30 * 0.3048);
    expect_number("12 metres", 0, 12);
    expect_number("3-4", 0, 4);                /* a range: its upper bound */
    expect_number("4-3", 0, 4);
    expect_number("3 to 5", 0, 5);
    expect_number("3\xE2\x80\x93" "5", 0, 5);  /* en dash */
    expect_number("3;4", 0, 4);                /* a list: the largest */
    expect_number("2;5;3", 0, 5);
    expect_number("two", ACCEPT_WORDS, 2);
    expect_number("Twelve", ACCEPT_WORDS, 12);
    expect_not_number("two", 0);
    expect_number("R+2", ACCEPT_GROUND_PLUS, 3);
    expect_number("B\xC3\xA2timent R+4", ACCEPT_GROUND_PLUS, 5);
    expect_not_number("R+", ACCEPT_GROUND_PLUS);
    expect_not_number("BR+2", ACCEPT_GROUND_PLUS);
    expect_not_number("R+2", 0);
    expect_not_number("", 0);
    expect_not_number("yes", 0);
    expect_not_number("4,5", 0);
    expect_not_number("3 floors", 0);
}

static void test_year_and_distance(void **state)
{
    (void)state;
    double y;
    assert_int_equal(st_rtext_year("1905-06-01", 10, &y), 1);
    assert_true(y == 1905);
    assert_int_equal(st_rtext_year("~1890s", 6, &y), 1);
    assert_true(y == 1890);
    assert_int_equal(st_rtext_year("C19", 3, &y), 0);
    assert_int_equal(st_rtext_year("12345", 5, &y), 0);
    assert_int_equal(st_rtext_distance("storys", "storeys", 2), 1);
    assert_int_equal(st_rtext_distance("mpa", "map", 2), 2);
    assert_int_equal(st_rtext_distance("occupancy", "storeys", 2), 3);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_names_and_punctuation),
        cmocka_unit_test(test_numbers),
        cmocka_unit_test(test_strings),
        cmocka_unit_test(test_regex_versus_division),
        cmocka_unit_test(test_error_tokens),
        cmocka_unit_test(test_token_limit),
        cmocka_unit_test(test_eof_points_at_last_line),
        cmocka_unit_test(test_fold),
        cmocka_unit_test(test_numbers_in_values),
        cmocka_unit_test(test_year_and_distance),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
