/* Small power-of-two complex FFTs for the composition analysis (spectral
 * residual saliency at 64x64, phase correlation at 128x64).  Iterative
 * radix-2 decimation in time (Cooley & Tukey 1965), with the stages taken
 * two at a time: each pass loads four rows, runs the butterflies of two
 * consecutive radix-2 stages on them in registers and stores them once (the
 * data flow of a radix-4 pass, but the same products and sums as plain
 * radix-2, so results do not depend on the grouping).  The 2-D transform
 * runs the butterflies on whole rows at once (the column transform, with
 * contiguous inner loops that vectorise), transposes (with the next
 * transform's bit-reversal folded in), does the same again and transposes
 * back.  A forward and an inverse transform in a row can leave out the
 * transposes between them (coach_fft2d_fwd_t / coach_fft2d_inv_t): the
 * spectrum stays transposed, and the inverse runs its x transforms first.
 * Twiddles and the bit-reversal table live in the plan, so a transform
 * never allocates.
 *
 * Where the time goes (callgrind, bench build -O3 -march=x86-64-v2, per
 * 2-D transform): one pass per radix-2 stage with the transposes moving
 * floats one by one cost 0.26 M instructions at 64x64 and 0.54 M at 128x64;
 * two stages per pass and transposes in 2 x 2 blocks of 64-bit lanes bring
 * that to ~0.21 M / 0.43 M, and the AVX2 copy of the butterflies to 0.10 M /
 * 0.21 M; with AVX2, 4 x 4-block transposes take another ~6% off the time
 * of a 128x64 transform (microbenchmark, 19.5 -> 18.3 us). */
#include <math.h>
#include <string.h>
#ifdef __SSE2__
#include <emmintrin.h>
#endif

#include "coach/coach_internal.h"
#if COACH_AVX2
#include <immintrin.h>
#endif

COACH_O3

/* The butterflies are compute-bound: with AVX2 a copy compiled for it
 * (twice the lanes) is chosen at plan time (see COACH_AVX2). */
#define KBODY static inline __attribute__((always_inline))

int coach_fft_plan_init(coach_fft_plan *p, int n)
{
    int lg = 0;
    while ((1 << lg) < n)
        lg++;
    if (n < 2 || n > COACH_FFT_MAX || (1 << lg) != n)
        return -1;
    p->n = n;
    p->log2n = lg;
    for (int i = 0; i < n / 2; i++) {
        double a = -2.0 * M_PI * i / n;
        p->tw_re[i] = (float)cos(a);
        p->tw_im[i] = (float)sin(a);
    }
    p->simd = coach_cpu_avx2();
    for (int i = 0; i < n; i++) {
        int r = 0;
        for (int b = 0; b < lg; b++)
            if (i & (1 << b))
                r |= 1 << (lg - 1 - b);
        p->rev[i] = (uint16_t)r;
    }
    return 0;
}

/* One radix-2 butterfly: (a + b w, a - b w) into o[0..3] (re, im, re, im). */
KBODY void bfly(float ar, float ai, float br, float bi, float wr, float wi, float o[4])
{
    float tr = br * wr - bi * wi, ti = br * wi + bi * wr;
    o[0] = ar + tr;
    o[1] = ai + ti;
    o[2] = ar - tr;
    o[3] = ai - ti;
}

/* One radix-2 stage on rows a and b (cols complex values each), twiddle w. */
KBODY void stage1(float *restrict a, float *restrict b, float wr, float wi, int cols)
{
    for (int c = 0; c < cols; c++) {
        float o[4];
        bfly(a[2 * c], a[2 * c + 1], b[2 * c], b[2 * c + 1], wr, wi, o);
        a[2 * c] = o[0];
        a[2 * c + 1] = o[1];
        b[2 * c] = o[2];
        b[2 * c + 1] = o[3];
    }
}

/* Two radix-2 stages on rows x0..x3 (x1 = x0 + q rows, ...): the first
 * pairs (x0, x1) and (x2, x3) with twiddle w1, the second (x0, x2) with w2
 * and (x1, x3) with w3 (w = w1, w2, w3 as re, im). */
KBODY void stage2(float *restrict x0, float *restrict x1, float *restrict x2, float *restrict x3,
                  const float w[6], int cols)
{
    for (int c = 0; c < cols; c++) {
        const int re = 2 * c, im = 2 * c + 1;
        float y01[4], y23[4], z02[4], z13[4];
        bfly(x0[re], x0[im], x1[re], x1[im], w[0], w[1], y01);
        bfly(x2[re], x2[im], x3[re], x3[im], w[0], w[1], y23);
        bfly(y01[0], y01[1], y23[0], y23[1], w[2], w[3], z02);
        bfly(y01[2], y01[3], y23[2], y23[3], w[4], w[5], z13);
        x0[re] = z02[0];
        x0[im] = z02[1];
        x2[re] = z02[2];
        x2[im] = z02[3];
        x1[re] = z13[0];
        x1[im] = z13[1];
        x3[re] = z13[2];
        x3[im] = z13[3];
    }
}

/* Transforms every column of a rows x cols block of interleaved complex
 * values (rows = p->n, already in bit-reversed order) in place. */
KBODY void fft_columns_body(const coach_fft_plan *p, float *restrict x, int cols, int inverse)
{
    const int n = p->n;
    const size_t rl = 2 * (size_t)cols; /* floats per row */
    const float sgn = inverse ? -1.0f : 1.0f;
    int len = 2;
    if (p->log2n & 1) {
        for (int i = 0; i < n; i += 2)
            stage1(x + i * rl, x + (i + 1) * rl, p->tw_re[0], sgn * p->tw_im[0], cols);
        len = 4;
    }
    for (; len <= n / 2; len <<= 2) {
        const int q = len >> 1, step = n / len;
        for (int i = 0; i < n; i += 2 * len)
            for (int k = 0; k < q; k++) {
                const float w[6] = {p->tw_re[k * step], sgn * p->tw_im[k * step],
                                    p->tw_re[k * step / 2], sgn * p->tw_im[k * step / 2],
                                    p->tw_re[(k + q) * step / 2], sgn * p->tw_im[(k + q) * step / 2]};
                float *r0 = x + (size_t)(i + k) * rl;
                stage2(r0, r0 + q * rl, r0 + 2 * q * rl, r0 + 3 * q * rl, w, cols);
            }
    }
}

static void fft_columns_plain(const coach_fft_plan *p, float *restrict x, int cols, int inverse)
{
    fft_columns_body(p, x, cols, inverse);
}

#if COACH_AVX2
__attribute__((target("avx2"))) static void fft_columns_avx2(const coach_fft_plan *p,
                                                             float *restrict x, int cols,
                                                             int inverse)
{
    fft_columns_body(p, x, cols, inverse);
}
#endif

static void fft_columns(const coach_fft_plan *p, float *restrict x, int cols, int inverse)
{
#if COACH_AVX2
    if (p->simd) {
        fft_columns_avx2(p, x, cols, inverse);
        return;
    }
#endif
    fft_columns_plain(p, x, cols, inverse);
}

/* Rows of x into bit-reversed order (swaps: the permutation is an involution). */
static void bit_reverse_rows(const coach_fft_plan *p, float *restrict x, int cols)
{
    const size_t rl = 2 * (size_t)cols;
    for (int i = 0; i < p->n; i++) {
        int j = p->rev[i];
        if (j > i) {
            float *a = x + i * rl, *b = x + j * rl;
            for (size_t c = 0; c < rl; c++) {
                float t = a[c];
                a[c] = b[c];
                b[c] = t;
            }
        }
    }
}

/* dst (cols x rows) = src (rows x cols) transposed, its rows in the order
 * rev (NULL: as they come).  In 2 x 2 blocks of complex values, each
 * complex moved as one 64-bit lane (rows and cols are even). */
static void transpose(const float *restrict src, float *restrict dst, int rows, int cols,
                      const uint16_t *rev)
{
    for (int c = 0; c < cols; c += 2) {
        float *d0 = dst + 2 * (size_t)(rev ? rev[c] : c) * rows;
        float *d1 = dst + 2 * (size_t)(rev ? rev[c + 1] : c + 1) * rows;
        for (int r = 0; r < rows; r += 2) {
            const float *s0 = src + 2 * ((size_t)r * cols + c), *s1 = s0 + 2 * (size_t)cols;
#ifdef __SSE2__
            __m128d a = _mm_loadu_pd((const double *)s0), b = _mm_loadu_pd((const double *)s1);
            _mm_storeu_pd((double *)(d0 + 2 * r), _mm_unpacklo_pd(a, b));
            _mm_storeu_pd((double *)(d1 + 2 * r), _mm_unpackhi_pd(a, b));
#else
            d0[2 * r] = s0[0];
            d0[2 * r + 1] = s0[1];
            d0[2 * r + 2] = s1[0];
            d0[2 * r + 3] = s1[1];
            d1[2 * r] = s0[2];
            d1[2 * r + 1] = s0[3];
            d1[2 * r + 2] = s1[2];
            d1[2 * r + 3] = s1[3];
#endif
        }
    }
}

#if COACH_AVX2
/* transpose() in 4 x 4 blocks (rows and cols multiples of 4): half the
 * loads and stores of the 2 x 2 blocks. */
__attribute__((target("avx2"))) static void transpose4(const float *restrict src,
                                                       float *restrict dst, int rows, int cols,
                                                       const uint16_t *rev)
{
    for (int c = 0; c < cols; c += 4) {
        double *d[4];
        for (int j = 0; j < 4; j++)
            d[j] = (double *)(dst + 2 * (size_t)(rev ? rev[c + j] : c + j) * rows);
        for (int r = 0; r < rows; r += 4) {
            const double *s = (const double *)(src + 2 * ((size_t)r * cols + c));
            const __m256d r0 = _mm256_loadu_pd(s), r1 = _mm256_loadu_pd(s + cols);
            const __m256d r2 = _mm256_loadu_pd(s + 2 * (size_t)cols);
            const __m256d r3 = _mm256_loadu_pd(s + 3 * (size_t)cols);
            const __m256d t0 = _mm256_unpacklo_pd(r0, r1), t1 = _mm256_unpackhi_pd(r0, r1);
            const __m256d t2 = _mm256_unpacklo_pd(r2, r3), t3 = _mm256_unpackhi_pd(r2, r3);
            _mm256_storeu_pd(d[0] + r, _mm256_permute2f128_pd(t0, t2, 0x20));
            _mm256_storeu_pd(d[1] + r, _mm256_permute2f128_pd(t1, t3, 0x20));
            _mm256_storeu_pd(d[2] + r, _mm256_permute2f128_pd(t0, t2, 0x31));
            _mm256_storeu_pd(d[3] + r, _mm256_permute2f128_pd(t1, t3, 0x31));
        }
    }
}
#endif

/* transpose() with the AVX2 blocks where the plan has them. */
static void transpose_p(const coach_fft_plan *p, const float *restrict src, float *restrict dst,
                        int rows, int cols, const uint16_t *rev)
{
#if COACH_AVX2
    if (p->simd && rows % 4 == 0 && cols % 4 == 0) {
        transpose4(src, dst, rows, cols, rev);
        return;
    }
#endif
    (void)p;
    transpose(src, dst, rows, cols, rev);
}

/* Transforms along the columns with plan first (data: first->n rows of
 * second->n values), transposes into out (second->n rows of first->n, in
 * the bit-reversed order the next pass needs) and transforms along its
 * columns with plan second. */
static void two_passes(const coach_fft_plan *first, const coach_fft_plan *second, float *data,
                       float *out, int inverse)
{
    bit_reverse_rows(first, data, second->n);
    fft_columns(first, data, second->n, inverse);
    transpose_p(first, data, out, first->n, second->n, second->rev);
    fft_columns(second, out, first->n, inverse);
}

void coach_fft2d(const coach_fft_plan *px, const coach_fft_plan *py, float *data, float *scratch,
                 int inverse)
{
    two_passes(py, px, data, scratch, inverse);
    transpose_p(px, scratch, data, px->n, py->n, NULL);
}

void coach_fft2d_fwd_t(const coach_fft_plan *px, const coach_fft_plan *py, float *data, float *out)
{
    two_passes(py, px, data, out, 0);
}

void coach_fft2d_inv_t(const coach_fft_plan *px, const coach_fft_plan *py, float *spec, float *out)
{
    two_passes(px, py, spec, out, 1);
}
