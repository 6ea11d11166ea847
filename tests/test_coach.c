/* cmocka tests for coach/.  Several people add tests here at once: add with
 * small insertions (never rewrite the file), each test next to its section's
 * other tests and in the matching section of main()'s list. */
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <setjmp.h>
#include <cmocka.h>

#include "coach/coach.h"

/* ==== section A ==== */

/* Bytes per pixel of the first plane, from the V4L2 pixel format reference
 * (linux kernel docs, "Packed YUV formats" / "Planar YUV formats" / "RGB
 * formats"): YUYV carries one Y and half a chroma pair per pixel, NV12 and
 * GREY one byte of Y, RGB24/BGR24 three bytes, XRGB8888 four. */
static void test_format_bpp_layouts(void **state)
{
    (void)state;
    assert_int_equal(coach_format_bpp(COACH_FMT_RGB24), 3);
    assert_int_equal(coach_format_bpp(COACH_FMT_BGR24), 3);
    assert_int_equal(coach_format_bpp(COACH_FMT_XRGB8888), 4);
    assert_int_equal(coach_format_bpp(COACH_FMT_YUYV), 2);
    assert_int_equal(coach_format_bpp(COACH_FMT_NV12), 1);
    assert_int_equal(coach_format_bpp(COACH_FMT_GREY), 1);
    assert_int_equal(coach_format_bpp(COACH_FMT_NONE), 0);
}

/* ==== section B ==== */

int main(void)
{
    const struct CMUnitTest tests[] = {
        /* ---- section A ---- */
        cmocka_unit_test(test_format_bpp_layouts),
        /* ---- section B ---- */
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
