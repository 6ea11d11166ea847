/* Global frame-to-frame shift by phase correlation (Kuglin & Hudson 1975):
 * the normalised cross-power spectrum of two frames is a pure phase ramp
 * whose inverse transform peaks at their relative shift.  A Hann window
 * keeps the frame borders from dominating the spectrum, and a parabola
 * through the peak and its neighbours gives the sub-pixel shift.
 *
 * The window is MW x MH pixels taken from the middle of the analysis image
 * after an integer box reduction by k = max(1, w / 160), so the measurable
 * shift is up to MW/2 * k analysis pixels sideways per frame. */
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "coach/coach_internal.h"

#define MW 128
#define MH 64
#define MN (MW * MH)

struct coach_motion {
    coach_fft_plan px, py;
    int have_prev;
    int prev_k;
    float win[MN];
    float prev[2 * MN];   /* spectrum of the previous frame */
    float cur[2 * MN];
    float work[2 * MN];
    float scratch[2 * MN];
};

coach_motion *coach_motion_create(void)
{
    coach_motion *m = calloc(1, sizeof *m);
    if (!m)
        return NULL;
    if (coach_fft_plan_init(&m->px, MW) || coach_fft_plan_init(&m->py, MH)) {
        free(m);
        return NULL;
    }
    for (int y = 0; y < MH; y++)
        for (int x = 0; x < MW; x++)
            m->win[y * MW + x] = (float)((0.5 - 0.5 * cos(2 * M_PI * (x + 0.5) / MW)) *
                                         (0.5 - 0.5 * cos(2 * M_PI * (y + 0.5) / MH)));
    return m;
}

void coach_motion_destroy(coach_motion *m) { free(m); }

void coach_motion_reset(coach_motion *m)
{
    if (m)
        m->have_prev = 0;
}

/* Fills cur with the windowed, mean-removed patch; returns its variance. */
static double take_patch(coach_motion *m, const float *luma, int w, int h, int k)
{
    const int rw = w / k, rh = h / k;
    const int ox = (rw - MW) / 2, oy = (rh - MH) / 2;
    const float inv = 1.0f / (float)(k * k);
    double sum = 0;
    int cnt = 0;
    float *p = m->work; /* real patch, MN floats */
    for (int y = 0; y < MH; y++) {
        int ry = oy + y;
        for (int x = 0; x < MW; x++) {
            int rx = ox + x;
            float v = -1.0f;
            if (rx >= 0 && ry >= 0 && rx < rw && ry < rh) {
                const float *s = luma + (size_t)ry * k * w + (size_t)rx * k;
                float a = 0;
                for (int j = 0; j < k; j++)
                    for (int i = 0; i < k; i++)
                        a += s[(size_t)j * w + i];
                v = a * inv;
                sum += v;
                cnt++;
            }
            p[y * MW + x] = v;
        }
    }
    if (cnt == 0)
        return 0;
    const float mean = (float)(sum / cnt);
    double var = 0;
    for (int i = MN - 1; i >= 0; i--) {
        float v = p[i] < 0 ? 0.0f : p[i] - mean;
        var += (double)v * v * m->win[i];
        m->cur[2 * i] = v * m->win[i];
        m->cur[2 * i + 1] = 0;
    }
    return var / MN;
}

static double parabola(double a, double b, double c)
{
    double den = a - 2.0 * b + c;
    return den < 0 ? 0.5 * (a - c) / den : 0.0;
}

int coach_motion_run(coach_motion *m, const float *luma, int w, int h, double *dx, double *dy)
{
    *dx = *dy = 0;
    if (!m || w < 8 || h < 8)
        return 0;
    int k = w / 160;
    if (k < 1)
        k = 1;
    double var = take_patch(m, luma, w, h, k);
    if (var < 0.25) {   /* under ~1 luma level of texture: nothing to track */
        m->have_prev = 0;
        return 0;
    }
    coach_fft2d(&m->px, &m->py, m->cur, m->scratch, 0);
    int measured = 0;
    if (m->have_prev && m->prev_k == k) {
        for (int i = 0; i < MN; i++) {
            float ar = m->cur[2 * i], ai = m->cur[2 * i + 1];
            float br = m->prev[2 * i], bi = -m->prev[2 * i + 1];
            float re = ar * br - ai * bi, im = ar * bi + ai * br;
            float mag = sqrtf(re * re + im * im) + 1e-20f;
            m->work[2 * i] = re / mag;
            m->work[2 * i + 1] = im / mag;
        }
        coach_fft2d(&m->px, &m->py, m->work, m->scratch, 1);
        int bi = 0;
        float bv = -1e30f;
        for (int i = 0; i < MN; i++)
            if (m->work[2 * i] > bv) {
                bv = m->work[2 * i];
                bi = i;
            }
        int bx = bi % MW, by = bi / MW;
#define RE(x, y) m->work[2 * ((((y) + MH) % MH) * MW + (((x) + MW) % MW))]
        double sx = bx + parabola(RE(bx - 1, by), RE(bx, by), RE(bx + 1, by));
        double sy = by + parabola(RE(bx, by - 1), RE(bx, by), RE(bx, by + 1));
#undef RE
        if (sx > MW / 2)
            sx -= MW;
        if (sy > MH / 2)
            sy -= MH;
        *dx = sx * k;
        *dy = sy * k;
        measured = 1;
    }
    memcpy(m->prev, m->cur, sizeof m->prev);
    m->have_prev = 1;
    m->prev_k = k;
    return measured;
}
