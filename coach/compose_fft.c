/* Small power-of-two complex FFTs for the composition analysis (spectral
 * residual saliency at 64x64, phase correlation at 128x64).  Iterative
 * radix-2 decimation in time (Cooley & Tukey 1965).  The 2-D transform runs
 * the butterflies on whole rows at once (the column transform, with
 * contiguous inner loops that vectorise), transposes, does the same again
 * and transposes back.  Twiddles and the bit-reversal table live in the
 * plan, so a transform never allocates. */
#include <math.h>
#include <string.h>

#include "coach/coach_internal.h"

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
    for (int i = 0; i < n; i++) {
        int r = 0;
        for (int b = 0; b < lg; b++)
            if (i & (1 << b))
                r |= 1 << (lg - 1 - b);
        p->rev[i] = (uint16_t)r;
    }
    return 0;
}

/* Transforms every column of a rows x cols block of interleaved complex
 * values (rows = p->n) in place. */
static void fft_columns(const coach_fft_plan *p, float *restrict x, int cols, int inverse)
{
    const int n = p->n;
    const size_t rl = 2 * (size_t)cols; /* floats per row */
    for (int i = 0; i < n; i++) {
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
    const float sgn = inverse ? -1.0f : 1.0f;
    for (int len = 2; len <= n; len <<= 1) {
        const int half = len >> 1, step = n / len;
        for (int i = 0; i < n; i += len)
            for (int k = 0; k < half; k++) {
                const float wr = p->tw_re[k * step], wi = sgn * p->tw_im[k * step];
                float *restrict a = x + (size_t)(i + k) * rl;
                float *restrict b = x + (size_t)(i + k + half) * rl;
                for (int c = 0; c < cols; c++) {
                    float br = b[2 * c] * wr - b[2 * c + 1] * wi;
                    float bi = b[2 * c] * wi + b[2 * c + 1] * wr;
                    float ar = a[2 * c], ai = a[2 * c + 1];
                    b[2 * c] = ar - br;
                    b[2 * c + 1] = ai - bi;
                    a[2 * c] = ar + br;
                    a[2 * c + 1] = ai + bi;
                }
            }
    }
}

static void transpose(const float *restrict src, float *restrict dst, int rows, int cols)
{
    for (int r = 0; r < rows; r++)
        for (int c = 0; c < cols; c++) {
            dst[2 * ((size_t)c * rows + r)] = src[2 * ((size_t)r * cols + c)];
            dst[2 * ((size_t)c * rows + r) + 1] = src[2 * ((size_t)r * cols + c) + 1];
        }
}

void coach_fft2d(const coach_fft_plan *px, const coach_fft_plan *py, float *data, float *scratch,
                 int inverse)
{
    const int w = px->n, h = py->n;
    fft_columns(py, data, w, inverse);
    transpose(data, scratch, h, w);
    fft_columns(px, scratch, h, inverse);
    transpose(scratch, data, w, h);
}
