/* Global frame-to-frame shift by phase correlation (Kuglin & Hudson 1975):
 * the normalised cross-power spectrum of two frames is a pure phase ramp
 * whose inverse transform peaks at their relative shift.  A Hann window
 * keeps the frame borders from dominating the spectrum; the sub-pixel
 * peak comes from the ratio of the peak to its larger neighbour, the
 * estimator Foroosh, Zerubia & Berthod (2002) derive for the sinc-shaped
 * phase correlation peak.
 *
 * This is the camera's motion, so the subject is left out: the region
 * around the subject's box in either frame is faded to the patch mean with
 * a soft edge in both frames, otherwise on a plain backdrop the subject's
 * own motion would be taken for the camera's (and lead room would vanish).
 *
 * The window is MW x MH pixels taken from the middle of the analysis image
 * after an integer box reduction by k = max(1, w / 160), so the measurable
 * shift is up to MW/2 * k analysis pixels sideways per frame.
 *
 * Where the time goes (callgrind, bench build, 1080p harbour demo, per
 * frame): 2.9 M instructions with the FFTs one pass per stage, a cosine
 * per masked cell, the patch sums in one running sum each and the
 * cross-power spectrum worked out at every frequency into a second array;
 * 0.87 M now: the two 128x64 FFTs ~0.38 M (the spectrum stays transposed
 * between them), the cross-power spectrum (half of it, in place, four
 * frequencies at a time) ~0.1 M, the patches' means and texture 0.2 M, the
 * complex input 0.03 M, the patch 0.08 M, the mask 0.06 M. */
#include <math.h>
#include <stdlib.h>
#include <string.h>
#ifdef __SSE2__
#include <xmmintrin.h>
#endif

#include "coach/coach_internal.h"

COACH_O3

#define MW 128
#define MH 64
#define MN (MW * MH)
/* Lowest phase-correlation peak taken as a match (fraction of the ideal 1). */
#define MIN_PEAK 0.08f
/* Texture needed to track: mean squared difference between neighbouring
 * patch cells, in (8-bit luma)^2 (a smooth gradient under noise has less). */
#define MIN_TEXTURE 0.5
/* Width of the mask's soft edge, patch cells. */
#define RAMP 6.0

struct coach_motion {
    int max_w;
    coach_fft_plan px, py;
    int have_prev;
    int prev_k;
    int prev_has_box;
    coach_box prev_box;
    float win[MN];
    float wm[MN];         /* subject mask weights, 0..1 */
    float ok[MN];         /* cells that count for the mean and texture */
    float *rowsum;        /* one analysis row of k rows summed (max_w) */
    float raw[2][MN];     /* reduced patches, unmasked (-1: outside): */
    int cur;              /* raw[cur] this frame's, the other the previous */
    float a[2 * MN];
    float scratch[2 * MN];
};

coach_motion *coach_motion_create(int max_w)
{
    if (max_w < 1)
        return NULL;
    coach_motion *m = calloc(1, sizeof *m);
    if (!m)
        return NULL;
    m->max_w = max_w;
    m->rowsum = malloc((size_t)max_w * sizeof(float));
    if (!m->rowsum || coach_fft_plan_init(&m->px, MW) || coach_fft_plan_init(&m->py, MH)) {
        coach_motion_destroy(m);
        return NULL;
    }
    for (int y = 0; y < MH; y++)
        for (int x = 0; x < MW; x++)
            m->win[y * MW + x] = (float)((0.5 - 0.5 * cos(2 * M_PI * (x + 0.5) / MW)) *
                                         (0.5 - 0.5 * cos(2 * M_PI * (y + 0.5) / MH)));
    return m;
}

void coach_motion_destroy(coach_motion *m)
{
    if (!m)
        return;
    free(m->rowsum);
    free(m);
}

void coach_motion_reset(coach_motion *m)
{
    if (m)
        m->have_prev = 0;
}

/* The middle MW x MH of the image reduced by k; -1 where it falls outside. */
static void take_patch(coach_motion *m, const float *luma, int w, int h, int k, float *p)
{
    const int rw = w / k, rh = h / k;
    const int ox = (rw - MW) / 2, oy = (rh - MH) / 2;
    const float inv = 1.0f / (float)(k * k);
    /* the columns of the image the patch covers, in analysis pixels */
    const int x0 = (ox > 0 ? ox : 0) * k, x1 = (ox + MW < rw ? ox + MW : rw) * k;
    float *restrict row = m->rowsum;
    for (int y = 0; y < MH; y++) {
        int ry = oy + y;
        float *o = p + y * MW;
        if (ry < 0 || ry >= rh) {
            for (int x = 0; x < MW; x++)
                o[x] = -1.0f;
            continue;
        }
        /* k rows summed whole (contiguous, vectorised), then k columns */
        const float *s0 = luma + (size_t)ry * k * w;
        for (int xx = x0; xx < x1; xx++)
            row[xx] = s0[xx];
        for (int j = 1; j < k; j++) {
            const float *sj = s0 + (size_t)j * w;
            for (int xx = x0; xx < x1; xx++)
                row[xx] += sj[xx];
        }
        /* patch columns xa .. xb-1 lie inside the reduced image */
        const int xa = ox < 0 ? -ox : 0, xb = ox + MW < rw ? MW : rw - ox;
        for (int x = 0; x < xa; x++)
            o[x] = -1.0f;
        for (int x = xb; x < MW; x++)
            o[x] = -1.0f;
        if (k == 2) { /* the usual case (analysis images 320..479 wide) */
            for (int x = xa; x < xb; x++)
                o[x] = (row[2 * (ox + x)] + row[2 * (ox + x) + 1]) * inv;
            continue;
        }
        for (int x = xa; x < xb; x++) {
            float acc = 0;
            for (int i = 0; i < k; i++)
                acc += row[(ox + x) * k + i];
            o[x] = acc * inv;
        }
    }
}

/* Lowers the weights in wm (1 = use) around a box given in fractions of
 * the analysis image, grown by a quarter of its size on each side: 0 inside,
 * rising to 1 over RAMP cells outside along a raised cosine, so the mask
 * adds no sharp edges of its own to the spectrum.  The distance is the
 * larger of the distances along x and y and the ramp rises with it, so the
 * weight is the larger of the ramps along x and y: MW + MH cosines, not one
 * per cell. */
static void mask_box(float *wm, const coach_box *bx, int w, int h, int k)
{
    const int rw = w / k, rh = h / k;
    const int ox = (rw - MW) / 2, oy = (rh - MH) / 2;
    const double x0 = (bx->x - 0.75 * bx->w) * rw - ox, x1 = (bx->x + 0.75 * bx->w) * rw - ox;
    const double y0 = (bx->y - 0.75 * bx->h) * rh - oy, y1 = (bx->y + 0.75 * bx->h) * rh - oy;
    float rx[MW];  /* ramp along x; > 1: outside the ramp (no change) */
    int xa = MW, xb = 0; /* the columns with rx <= 1 */
    for (int x = 0; x < MW; x++) {
        double dx = x + 0.5 < x0 ? x0 - (x + 0.5) : x + 0.5 > x1 ? x + 0.5 - x1 : 0;
        rx[x] = dx >= RAMP ? 2.0f : (float)(0.5 - 0.5 * cos(M_PI * dx / RAMP));
        if (dx < RAMP) {
            xa = x < xa ? x : xa;
            xb = x + 1;
        }
    }
    for (int y = 0; y < MH; y++) {
        double dy = y + 0.5 < y0 ? y0 - (y + 0.5) : y + 0.5 > y1 ? y + 0.5 - y1 : 0;
        if (dy >= RAMP)
            continue;
        const float ry = (float)(0.5 - 0.5 * cos(M_PI * dy / RAMP));
        float *row = wm + y * MW;
        for (int x = xa; x < xb; x++) {
            if (rx[x] > 1.0f)
                continue;
            float v = rx[x] > ry ? rx[x] : ry;
            if (v < row[x])
                row[x] = v;
        }
    }
}

/* Running sums in four interleaved lanes (element i into lane i % 4),
 * added up at the end: a fixed order, the same with or without vector
 * units, that SSE runs four at a time; one running sum (a strict
 * sequential order for floats) would stay scalar. */
typedef struct lanes4 { float v[4]; } lanes4;

/* acc[j] += a[i + j] * b[i + j] over the groups of four i in [0, n). */
static void lanes_dot(lanes4 *acc, const float *a, const float *b, int n)
{
#ifdef __SSE2__
    __m128 s = _mm_loadu_ps(acc->v);
    for (int i = 0; i + 4 <= n; i += 4)
        s = _mm_add_ps(s, _mm_mul_ps(_mm_loadu_ps(a + i), _mm_loadu_ps(b + i)));
    _mm_storeu_ps(acc->v, s);
#else
    for (int i = 0; i + 4 <= n; i += 4)
        for (int j = 0; j < 4; j++)
            acc->v[j] += a[i + j] * b[i + j];
#endif
}

/* Squared differences of the pairs (r[i], r[i + off]) weighted by
 * o[i] o[i + off] into tex, the weights into cnt, i in groups of four
 * over [0, n). */
static void lanes_diff(lanes4 *tex, lanes4 *cnt, const float *r, const float *o, int off, int n)
{
#ifdef __SSE2__
    __m128 t = _mm_loadu_ps(tex->v), c = _mm_loadu_ps(cnt->v);
    for (int i = 0; i + 4 <= n; i += 4) {
        __m128 d = _mm_sub_ps(_mm_loadu_ps(r + i + off), _mm_loadu_ps(r + i));
        __m128 wgt = _mm_mul_ps(_mm_loadu_ps(o + i), _mm_loadu_ps(o + i + off));
        t = _mm_add_ps(t, _mm_mul_ps(_mm_mul_ps(wgt, d), d));
        c = _mm_add_ps(c, wgt);
    }
    _mm_storeu_ps(tex->v, t);
    _mm_storeu_ps(cnt->v, c);
#else
    for (int i = 0; i + 4 <= n; i += 4)
        for (int j = 0; j < 4; j++) {
            float d = r[i + j + off] - r[i + j], wgt = o[i + j] * o[i + j + off];
            tex->v[j] += wgt * d * d;
            cnt->v[j] += wgt;
        }
#endif
}

static float lanes_total(const lanes4 *l)
{
    return ((l->v[0] + l->v[1]) + l->v[2]) + l->v[3];
}

/* The mean of the patch over the cells inside the image and of full
 * weight in wm into *mean; returns the texture: the mean squared
 * difference between neighbouring such cells (0 when too few are left). */
static double prepare(coach_motion *m, const float *raw, const float *wm, float *mean)
{
    /* ok: 1 for cells inside the image and of full weight */
    float *restrict ok = m->ok;
    for (int i = 0; i < MN; i++)
        ok[i] = (float)((raw[i] >= 0) & (wm[i] >= 1.0f));
    lanes4 sum = {{0}}, cnt = {{0}}, tex = {{0}}, ntex = {{0}};
    lanes_dot(&sum, ok, raw, MN);
    for (int i = 0; i < MN; i += 4)
        for (int j = 0; j < 4; j++)
            cnt.v[j] += ok[i + j];
    /* neighbours across: MW - 1 pairs a row, the last three by hand */
    for (int y = 0; y < MH; y++) {
        const float *r = raw + y * MW, *o = ok + y * MW;
        lanes_diff(&tex, &ntex, r, o, 1, MW - 4);
        for (int j = 0; j < 3; j++) {
            const int x = MW - 4 + j;
            float d = r[x + 1] - r[x], wgt = o[x] * o[x + 1];
            tex.v[j] += wgt * d * d;
            ntex.v[j] += wgt;
        }
    }
    /* neighbours down: every cell of the first MH - 1 rows */
    lanes_diff(&tex, &ntex, raw, ok, MW, MN - MW);
    const float s = lanes_total(&sum), c = lanes_total(&cnt);
    const float t = lanes_total(&tex), n = lanes_total(&ntex);
    if (c < MN / 8 || n < 1)
        return 0;
    *mean = s / c;
    return (double)t / n;
}

/* The complex input a + i b of the joint transform: each patch minus its
 * mean, times the weights wm and the Hann window (cells outside the image
 * count as the mean), a in the real parts and b in the imaginary. */
static void interleave(coach_motion *m, const float *ra, float ma, const float *rb, float mb)
{
    const float *wm = m->wm, *win = m->win;
    float *z = m->a;
#ifdef __SSE2__
    const __m128 zero = _mm_setzero_ps(), vma = _mm_set1_ps(ma), vmb = _mm_set1_ps(mb);
    for (int i = 0; i < MN; i += 4) { /* MN is a multiple of 4 */
        const __m128 a = _mm_loadu_ps(ra + i), b = _mm_loadu_ps(rb + i);
        const __m128 w = _mm_loadu_ps(wm + i), h = _mm_loadu_ps(win + i);
        const __m128 va = _mm_and_ps(_mm_cmpge_ps(a, zero), _mm_mul_ps(_mm_sub_ps(a, vma), w));
        const __m128 vb = _mm_and_ps(_mm_cmpge_ps(b, zero), _mm_mul_ps(_mm_sub_ps(b, vmb), w));
        const __m128 oa = _mm_mul_ps(va, h), ob = _mm_mul_ps(vb, h);
        _mm_storeu_ps(z + 2 * i, _mm_unpacklo_ps(oa, ob));
        _mm_storeu_ps(z + 2 * i + 4, _mm_unpackhi_ps(oa, ob));
    }
#else
    for (int i = 0; i < MN; i++) {
        float va = ra[i] >= 0 ? (ra[i] - ma) * wm[i] : 0.0f;
        float vb = rb[i] >= 0 ? (rb[i] - mb) * wm[i] : 0.0f;
        z[2 * i] = va * win[i];
        z[2 * i + 1] = vb * win[i];
    }
#endif
}

static double parabola(double a, double b, double c)
{
    double den = a - 2.0 * b + c;
    return den < 0 ? 0.5 * (a - c) / den : 0.0;
}

/* Sub-pixel offset of a peak c0 with neighbours cm (at -1) and cp (at +1).
 * A sharp, sinc-shaped peak (its far neighbour well below the near one)
 * follows Foroosh, Zerubia & Berthod (2002): d = c1 / (c1 +- c0) with c1
 * the larger neighbour, the root within a pixel of it.  A broad, symmetric
 * peak is not sinc-shaped; a parabola through the three values suits it. */
static double subpixel(double cm, double c0, double cp)
{
    double c1 = cp > cm ? cp : cm, cf = cp > cm ? cm : cp, sgn = cp > cm ? 1.0 : -1.0;
    if (c0 <= 0 || c1 <= 0)
        return 0;
    if (cf > 0.6 * c1)
        return parabola(cm, c0, cp);
    double d1 = c1 / (c1 + c0), d2 = c1 / (c1 - c0);
    double d = (d1 >= 0 && d1 < 1) ? d1 : d2;
    if (!(d >= 0 && d < 1))
        d = 0;
    if (d > 0.5)
        d = 0.5;
    return sgn * d;
}

/* The normalised cross-power spectrum R = A conj(B) / |A conj(B)| in place
 * of z (cw x ch), the transform of a + i b.  R is Hermitian (two real
 * signals), and the formula at -k gives exactly conj R(k), so each pair
 * k, -k is worked out once from Z(k) and Z(-k) and written to both. */
/* One frequency pair of cross_power: R(k) at q, conj R(k) at qm. */
static inline void cross_pair(float *z, int cw, int ch, int u, int v)
{
    const int q = v * cw + u, qm = ((ch - v) % ch) * cw + (cw - u) % cw;
    float A[2], B[2];
    coach_fft_split_pair(z, cw, ch, u, v, A, B);
    float ar = A[0], ai = A[1], br = B[0], bi = -B[1]; /* conj B */
    float re = ar * br - ai * bi, im = ar * bi + ai * br;
    float mag = sqrtf(re * re + im * im) + 1e-20f;
    re /= mag;
    im /= mag;
    z[2 * qm] = re; /* first: a self-paired k keeps its own value */
    z[2 * qm + 1] = -im;
    z[2 * q] = re;
    z[2 * q + 1] = im;
}

#ifdef __SSE2__
/* cross_pair for u .. u+3 of row v (u >= 1, so the partners are the
 * columns cw-u-3 .. cw-u of row vm, in reverse), four lanes at once with
 * the same operations; all loads before the stores, partners' first. */
static inline void cross_pair4(float *z, int cw, int ch, int u, int v)
{
    float *zq = z + 2 * (v * cw + u), *zm = z + 2 * (((ch - v) % ch) * cw + cw - u - 3);
    const __m128 q0 = _mm_loadu_ps(zq), q1 = _mm_loadu_ps(zq + 4);
    const __m128 m0 = _mm_loadu_ps(zm), m1 = _mm_loadu_ps(zm + 4);
    const __m128 zr = _mm_shuffle_ps(q0, q1, _MM_SHUFFLE(2, 0, 2, 0));
    const __m128 zi = _mm_shuffle_ps(q0, q1, _MM_SHUFFLE(3, 1, 3, 1));
    /* partner lanes reversed so lane j holds Z(-k) of lane j's k */
    const __m128 mr = _mm_shuffle_ps(m1, m0, _MM_SHUFFLE(0, 2, 0, 2));
    const __m128 mi = _mm_shuffle_ps(m1, m0, _MM_SHUFFLE(1, 3, 1, 3));
    const __m128 half = _mm_set1_ps(0.5f), nhalf = _mm_set1_ps(-0.5f), sign = _mm_set1_ps(-0.0f);
    const __m128 ar = _mm_mul_ps(half, _mm_add_ps(zr, mr)), ai = _mm_mul_ps(half, _mm_sub_ps(zi, mi));
    const __m128 br = _mm_mul_ps(half, _mm_add_ps(zi, mi));
    const __m128 bi = _mm_xor_ps(_mm_mul_ps(nhalf, _mm_sub_ps(zr, mr)), sign); /* conj B */
    const __m128 re = _mm_sub_ps(_mm_mul_ps(ar, br), _mm_mul_ps(ai, bi));
    const __m128 im = _mm_add_ps(_mm_mul_ps(ar, bi), _mm_mul_ps(ai, br));
    const __m128 mag = _mm_add_ps(_mm_sqrt_ps(_mm_add_ps(_mm_mul_ps(re, re), _mm_mul_ps(im, im))),
                                  _mm_set1_ps(1e-20f));
    const __m128 rr = _mm_div_ps(re, mag), ri = _mm_div_ps(im, mag), nri = _mm_xor_ps(ri, sign);
    /* partners: lane 3 (u+3) at the lowest address */
    const __m128 pr = _mm_shuffle_ps(rr, rr, _MM_SHUFFLE(0, 1, 2, 3));
    const __m128 pi = _mm_shuffle_ps(nri, nri, _MM_SHUFFLE(0, 1, 2, 3));
    _mm_storeu_ps(zm, _mm_unpacklo_ps(pr, pi));
    _mm_storeu_ps(zm + 4, _mm_unpackhi_ps(pr, pi));
    _mm_storeu_ps(zq, _mm_unpacklo_ps(rr, ri));
    _mm_storeu_ps(zq + 4, _mm_unpackhi_ps(rr, ri));
}
#endif

/* The normalised cross-power spectrum R = A conj(B) / |A conj(B)| in place
 * of z (cw x ch), the transform of a + i b.  R is Hermitian (two real
 * signals), and the formula at -k gives exactly conj R(k), so each pair
 * k, -k is worked out once from Z(k) and Z(-k) and written to both. */
static void cross_power(float *z, int cw, int ch)
{
    for (int v = 0; v <= ch / 2; v++) {
        const int ulast = (v == 0 || v == ch / 2) ? cw / 2 : cw - 1;
        cross_pair(z, cw, ch, 0, v);
        int u = 1;
#ifdef __SSE2__
        for (; u + 3 <= ulast; u += 4)
            cross_pair4(z, cw, ch, u, v);
#endif
        for (; u <= ulast; u++)
            cross_pair(z, cw, ch, u, v);
    }
}

int coach_motion_run(coach_motion *m, const float *luma, int w, int h, const coach_box *exclude,
                     double *dx, double *dy)
{
    *dx = *dy = 0;
    if (!m || w < 8 || h < 8 || w > m->max_w)
        return 0;
    int k = w / 160;
    if (k < 1)
        k = 1;
    const float *cur = m->raw[m->cur], *prev = m->raw[!m->cur];
    take_patch(m, luma, w, h, k, m->raw[m->cur]);
    int measured = 0;
    if (m->have_prev && m->prev_k == k) {
        /* One soft mask for both frames over the subject's region in
         * either. */
        for (int i = 0; i < MN; i++)
            m->wm[i] = 1.0f;
        if (exclude)
            mask_box(m->wm, exclude, w, h, k);
        if (m->prev_has_box)
            mask_box(m->wm, &m->prev_box, w, h, k);
        /* Both patches are real: one complex transform of a + i b gives
         * both spectra (coach_fft_split_pair), so the previous patch goes
         * into the imaginary parts. */
        float ma = 0, mb = 0;
        double vb = prepare(m, prev, m->wm, &mb);
        double va = prepare(m, cur, m->wm, &ma);
        if (va >= MIN_TEXTURE && vb >= MIN_TEXTURE) {
            interleave(m, cur, ma, prev, mb);
            /* the spectrum stays transposed (MW rows of MH) between the
             * two transforms: two transposes fewer */
            coach_fft2d_fwd_t(&m->px, &m->py, m->a, m->scratch);
            cross_power(m->scratch, MH, MW);
            coach_fft2d_inv_t(&m->px, &m->py, m->scratch, m->a);
            int bi = 0;
            float bv = -1e30f;
#ifdef __SSE2__
            /* the largest real part four at a time (the maximum does not
             * depend on the order; a NaN is passed over, as below), then
             * its first cell */
            __m128 mx4 = _mm_set1_ps(-1e30f);
            for (int i = 0; i < MN; i += 4)
                mx4 = _mm_max_ps(_mm_shuffle_ps(_mm_loadu_ps(m->a + 2 * i),
                                                _mm_loadu_ps(m->a + 2 * i + 4),
                                                _MM_SHUFFLE(2, 0, 2, 0)), mx4);
            float mx[4];
            _mm_storeu_ps(mx, mx4);
            for (int j = 0; j < 4; j++)
                bv = mx[j] > bv ? mx[j] : bv;
            while (bi < MN - 1 && m->a[2 * bi] != bv)
                bi++;
#else
            for (int i = 0; i < MN; i++)
                if (m->a[2 * i] > bv) {
                    bv = m->a[2 * i];
                    bi = i;
                }
#endif
            /* The peak's height is the share of the frequencies that agree
             * on one shift (1 for a pure shift); among noise it stays low
             * and measures nothing. */
            if (bv < MIN_PEAK * MN)
                goto done;
            int bx = bi % MW, by = bi / MW;
#define RE(x, y) m->a[2 * ((((y) + MH) % MH) * MW + (((x) + MW) % MW))]
            double sx = bx + subpixel(RE(bx - 1, by), RE(bx, by), RE(bx + 1, by));
            double sy = by + subpixel(RE(bx, by - 1), RE(bx, by), RE(bx, by + 1));
#undef RE
            if (sx > MW / 2)
                sx -= MW;
            if (sy > MH / 2)
                sy -= MH;
            *dx = sx * k;
            *dy = sy * k;
            measured = 1;
        }
    }
done:
    m->cur = !m->cur;
    m->have_prev = 1;
    m->prev_k = k;
    m->prev_has_box = exclude != NULL;
    if (exclude)
        m->prev_box = *exclude;
    return measured;
}
