/* Small power-of-two complex FFTs for the composition analysis (spectral
 * residual saliency at 64x64, phase correlation at 128x64).  Iterative
 * radix-2 decimation in time (Cooley & Tukey 1965); the twiddles and the
 * bit-reversal table live in the plan, so a transform never allocates. */
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

/* In place on n interleaved complex values with the given element stride
 * (in complex units).  inverse: conjugate twiddles, no 1/n scaling. */
static void fft1d(const coach_fft_plan *p, float *x, int stride, int inverse)
{
    const int n = p->n;
    for (int i = 0; i < n; i++) {
        int j = p->rev[i];
        if (j > i) {
            float *a = x + 2 * i * stride, *b = x + 2 * j * stride;
            float tr = a[0], ti = a[1];
            a[0] = b[0]; a[1] = b[1];
            b[0] = tr; b[1] = ti;
        }
    }
    const float sgn = inverse ? -1.0f : 1.0f;
    for (int len = 2; len <= n; len <<= 1) {
        const int half = len >> 1, step = n / len;
        for (int i = 0; i < n; i += len) {
            for (int k = 0; k < half; k++) {
                float wr = p->tw_re[k * step], wi = sgn * p->tw_im[k * step];
                float *a = x + 2 * (i + k) * stride;
                float *b = x + 2 * (i + k + half) * stride;
                float br = b[0] * wr - b[1] * wi;
                float bi = b[0] * wi + b[1] * wr;
                b[0] = a[0] - br; b[1] = a[1] - bi;
                a[0] += br; a[1] += bi;
            }
        }
    }
}

void coach_fft2d(const coach_fft_plan *px, const coach_fft_plan *py, float *data, int inverse)
{
    const int w = px->n, h = py->n;
    for (int y = 0; y < h; y++)
        fft1d(px, data + 2 * (size_t)y * w, 1, inverse);
    for (int x = 0; x < w; x++)
        fft1d(py, data + 2 * x, w, inverse);
}
