/* cmocka tests for the composition kernels that have a hand-picked AVX2
 * copy (compose_fft.c, level.c): each copy must give exactly the results of
 * the portable code (the FFT against the DFT's definition is in
 * test_coach.c). */
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <setjmp.h>
#include <cmocka.h>

#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "coach/coach_internal.h"

static uint32_t seed = 12345u;
static double urand(void)
{
    seed = seed * 1664525u + 1013904223u; /* Numerical Recipes' LCG constants */
    return (seed >> 8) * (1.0 / 16777216.0);
}

/* The portable and the AVX2 butterflies give bit-identical transforms
 * (the same IEEE single-precision operations in the same order), forward
 * and inverse, at the saliency's 64x64 and the motion estimate's 128x64. */
static void test_fft2d_simd_matches_portable(void **state)
{
    (void)state;
    static const int sizes[][2] = {{64, 64}, {128, 64}, {16, 8}};
    static float a[2 * 128 * 64], b[2 * 128 * 64], scratch[2 * 128 * 64];
    for (size_t s = 0; s < sizeof sizes / sizeof sizes[0]; s++) {
        const int w = sizes[s][0], h = sizes[s][1], n = 2 * w * h;
        coach_fft_plan px, py;
        assert_int_equal(coach_fft_plan_init(&px, w), 0);
        assert_int_equal(coach_fft_plan_init(&py, h), 0);
        for (int i = 0; i < n; i++)
            a[i] = b[i] = (float)(urand() * 255.0 - 128.0);
        for (int inverse = 0; inverse <= 1; inverse++) {
            coach_fft2d(&px, &py, a, scratch, inverse);
            coach_fft_plan qx = px, qy = py;
            qx.simd = qy.simd = 0;
            coach_fft2d(&qx, &qy, b, scratch, inverse);
            assert_memory_equal(a, b, (size_t)n * sizeof(float));
        }
    }
}

/* The level with the AVX2 Sobel pass and with the portable one: the same
 * estimate, field by field, on tilted horizons over noise and on frames of
 * leaning posts (the vertical family), both within 0.1 degree of the
 * rendered angle. */
static void test_level_simd_matches_portable(void **state)
{
    (void)state;
    enum { W = 320, H = 180 };
    static float luma[W * H];
    coach_level *l = coach_level_create(W, H);
    assert_non_null(l);
    for (int scene = 0; scene < 6; scene++) {
        const double deg = -12.0 + 5.0 * scene, t = tan(deg * M_PI / 180.0);
        for (int y = 0; y < H; y++)
            for (int x = 0; x < W; x++) {
                /* edges anti-aliased over about a pixel, as a lens draws them */
                double v;
                if (scene < 4) { /* horizon: sky above, darker sea below */
                    double d = (y - (0.45 * H - t * (x - 0.5 * W))) * cos(atan(t));
                    v = 170.0 - 100.0 * fmin(fmax(d + 0.5, 0.0), 1.0);
                } else { /* posts 8 px wide every 64 px, leaning by deg */
                    double u = fmod(x + t * (y - 0.5 * H) + 1024.0, 64.0) * cos(atan(t));
                    v = 90.0 + 110.0 * fmin(fmax(fmin(u, 8.0 - u) + 0.5, 0.0), 1.0);
                }
                luma[y * W + x] = (float)(v + 12.0 * (urand() - 0.5));
            }
        coach_level_est e1, e0;
        coach_level_set_simd(l, 1);
        coach_level_run(l, luma, W, H, &e1);
        coach_level_set_simd(l, 0);
        coach_level_run(l, luma, W, H, &e0);
        /* the rendered angle: a horizon rising to the right by deg reads
         * +deg; posts whose tops lean right by deg read -deg */
        assert_true(e1.has_tilt);
        assert_true(fabs(e1.tilt_deg - (scene < 4 ? deg : -deg)) < 0.1);
        assert_memory_equal(&e1, &e0, sizeof e1);
    }
    coach_level_destroy(l);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_fft2d_simd_matches_portable),
        cmocka_unit_test(test_level_simd_matches_portable),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
