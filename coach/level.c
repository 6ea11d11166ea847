/* Level (camera roll) and horizon from straight lines on the analysis luma.
 *
 * Method:
 *  1. Sobel gradients, then thin edges by non-maximum suppression along the
 *     gradient (Canny 1986) above a threshold that adapts to the noise.
 *  2. A Hough transform (Duda & Hart 1972) in the normal form
 *     rho = x cos(phi) + y sin(phi), restricted to two families of lines
 *     within 30 degrees of horizontal and of vertical.  Each edge point votes
 *     only for angles within a few degrees of its own gradient direction
 *     (O'Gorman & Clowes 1976), which keeps texture and noise from building
 *     false peaks and keeps the transform cheap.
 *  3. Peaks are refined: a parabola through the peak cell and its neighbours
 *     gives the sub-bin angle and offset; then along the line the edge is
 *     located to sub-pixel precision in every column (row for the vertical
 *     family) as the centroid of the gradient profile across the line, and a
 *     robust weighted least-squares fit of those positions gives the final
 *     angle.  The fit's coverage and residual decide whether the line is real.
 *  4. The dominant near-horizontal line that crosses most of the frame (a
 *     horizon, shoreline or table edge) gives the level; without one, the
 *     near-vertical lines (walls, door frames, masts) do, through the
 *     direction of their vanishing point (see verticals()).  A steep
 *     "horizon" that the verticals contradict is a receding line and loses
 *     to them.  Flat, blank and noise-only frames give no level at all.
 *
 * Where the time goes (callgrind, bench build, 320x180 analysis image of the
 * 1080p harbour demo, per frame): 2.7 M instructions before the edge scans
 * skipped sub-threshold pixels eight at a time and the Sobel pass got an
 * AVX2 copy, 1.8 M after: Sobel 0.2 M, sampled magnitude histogram 0.06 M,
 * thinning 0.2 M, voting 0.8 M (0.2 M of it clearing the accumulator),
 * peak search 0.1 M, line fits 0.1 M.  Working out each edge's angle, bin
 * and weight four edges at a time without branches (1.67 M) cut the level's
 * time by a quarter more than its instruction count: edge directions mix
 * unpredictably, and the scalar code's branches were mispredicted.
 */
#include <math.h>
#include <stdlib.h>
#include <string.h>
#ifdef __SSE2__
#include <emmintrin.h>
#endif

#include "coach/coach_internal.h"

COACH_O3

#define FAM_HALF_DEG 30.0         /* each family spans +-30 degrees          */
#define BIN_DEG 0.5               /* Hough angle bin                          */
#define NANG 121                  /* (2 * 30 / 0.5) + 1                       */
#define VOTE_SPREAD 4             /* +-2 degrees around the gradient angle    */
#define T_ABS 12.0f               /* Sobel magnitude floor, ~3-6 luma levels  */
#define MAX_PEAKS 12
/* Only edges among the strongest VOTE_TOP_PCT % of gradients vote: in a
 * busy texture (a choppy sea) the rest cannot outvote a real line but cost
 * as much to count.  The line fits still use every edge above threshold. */
#define VOTE_TOP_PCT 10
#define MAX_VERT_LINES 10

enum { FAM_H = 0, FAM_V = 1 };

typedef struct peak { float votes; int ia, ir; } peak;

typedef struct line_fit {
    int ok;
    double a, b;        /* across = a + b * along                          */
    double tilt_deg;
    int present;        /* positions used in the fit                       */
    int span;           /* positions along the line inside the frame       */
    int extent;         /* first to last position of the fitted run        */
    double rms;         /* residual, pixels                                */
    double weight;      /* summed edge strength of the fitted positions    */
} line_fit;

struct coach_level {
    int max_w, max_h, nrho_max;
    int simd;            /* 1: the AVX2 copy of the Sobel pass (compute-bound) */
    float *gx, *gy, *mag;
    int *edge_idx;       /* indices of edge pixels                          */
    int16_t *edge_x, *edge_y; /* and their coordinates                      */
    float *acc;          /* [2][NANG][nrho]                                 */
    float *pos, *wt;     /* sub-pixel positions along one line              */
    uint8_t *keep;
    /* padded to whole groups of 4 so the voting loop can read 4 at a time */
    float cosv[2][NANG + 4], sinv[2][NANG + 4];
};

coach_level *coach_level_create(int max_w, int max_h)
{
    if (max_w < 8 || max_h < 8)
        return NULL;
    coach_level *l = calloc(1, sizeof *l);
    if (!l)
        return NULL;
    size_t n = (size_t)max_w * max_h;
    int nrho = (int)ceil(sqrt((double)max_w * max_w + (double)max_h * max_h)) + 3;
    int len = max_w > max_h ? max_w : max_h;
    l->max_w = max_w;
    l->max_h = max_h;
    l->nrho_max = nrho;
    l->gx = malloc(n * sizeof(float));
    l->gy = malloc(n * sizeof(float));
    l->mag = malloc(n * sizeof(float));
    l->edge_idx = malloc(n * sizeof(int));
    l->edge_x = malloc(n * sizeof(int16_t));
    l->edge_y = malloc(n * sizeof(int16_t));
    l->acc = malloc((size_t)2 * NANG * nrho * sizeof(float));
    l->pos = malloc((size_t)len * sizeof(float));
    l->wt = malloc((size_t)len * sizeof(float));
    l->keep = malloc((size_t)len);
    if (!l->gx || !l->gy || !l->mag || !l->edge_idx || !l->edge_x || !l->edge_y || !l->acc || !l->pos ||
        !l->wt || !l->keep) {
        coach_level_destroy(l);
        return NULL;
    }
    l->simd = coach_cpu_avx2();
    for (int f = 0; f < 2; f++)
        for (int i = 0; i < NANG + 4; i++) {
            double phi = (f == FAM_H ? 90.0 : 0.0) + (i * BIN_DEG - FAM_HALF_DEG);
            l->cosv[f][i] = (float)cos(phi * M_PI / 180.0);
            l->sinv[f][i] = (float)sin(phi * M_PI / 180.0);
        }
    return l;
}

int coach_level_set_simd(coach_level *l, int on)
{
    int had = l->simd;
    l->simd = on && coach_cpu_avx2();
    return had;
}

void coach_level_destroy(coach_level *l)
{
    if (!l)
        return;
    free(l->gx);
    free(l->gy);
    free(l->mag);
    free(l->edge_idx);
    free(l->edge_x);
    free(l->edge_y);
    free(l->acc);
    free(l->pos);
    free(l->wt);
    free(l->keep);
    free(l);
}

/* One row of Sobel gradients from the rows above (a), at (b) and below (c);
 * outputs start at the second pixel. */
static inline __attribute__((always_inline)) void
sobel_row(const float *a, const float *b, const float *c, float *restrict gx, float *restrict gy,
          float *restrict m, int n)
{
    for (int i = 0; i < n; i++) {
        float sx = (a[i + 2] - a[i]) + 2.0f * (b[i + 2] - b[i]) + (c[i + 2] - c[i]);
        float sy = (c[i] - a[i]) + 2.0f * (c[i + 1] - a[i + 1]) + (c[i + 2] - a[i + 2]);
        gx[i] = sx;
        gy[i] = sy;
        m[i] = sx * sx + sy * sy;
    }
}

/* Rows 1 .. h-2 of gradients into gx, gy and the squared magnitude m (all
 * w x h); the first and last column of each row set to 0. */
static inline __attribute__((always_inline)) void
sobel_body(const float *p, int w, int h, float *restrict gx, float *restrict gy, float *restrict m)
{
    for (int y = 1; y < h - 1; y++) {
        const float *a = p + (size_t)(y - 1) * w;
        const size_t o = (size_t)y * w;
        gx[o] = gy[o] = m[o] = 0;
        gx[o + w - 1] = gy[o + w - 1] = m[o + w - 1] = 0;
        sobel_row(a, a + w, a + 2 * w, gx + o + 1, gy + o + 1, m + o + 1, w - 2);
    }
}

static void sobel_plain(const float *p, int w, int h, float *restrict gx, float *restrict gy,
                        float *restrict m)
{
    sobel_body(p, w, h, gx, gy, m);
}

#if COACH_AVX2
__attribute__((target("avx2"))) static void sobel_avx2(const float *p, int w, int h,
                                                       float *restrict gx, float *restrict gy,
                                                       float *restrict m)
{
    sobel_body(p, w, h, gx, gy, m);
}
#endif

/* Sobel gradients on the interior (the 1-pixel border stays 0), with mag
 * holding the squared magnitude.  Returns the edge threshold on the
 * magnitude: the floor, or twice the median magnitude when noise lifts the
 * median (for Gaussian noise few Sobel magnitudes exceed twice the median,
 * so thin noise edges rarely pass); *vote_thr gets the voting threshold
 * (see VOTE_TOP_PCT).  Both come from a sample of every second pixel of
 * every second row. */
static float gradients(coach_level *l, const float *p, int w, int h, float *vote_thr)
{
    uint32_t hist[64], hist4[4][64];
    memset(hist, 0, sizeof hist);
    memset(hist4, 0, sizeof hist4);
    memset(l->gx, 0, (size_t)w * sizeof(float));
    memset(l->gy, 0, (size_t)w * sizeof(float));
    memset(l->mag, 0, (size_t)w * sizeof(float));
    memset(l->gx + (size_t)(h - 1) * w, 0, (size_t)w * sizeof(float));
    memset(l->gy + (size_t)(h - 1) * w, 0, (size_t)w * sizeof(float));
    memset(l->mag + (size_t)(h - 1) * w, 0, (size_t)w * sizeof(float));
#if COACH_AVX2
    if (l->simd)
        sobel_avx2(p, w, h, l->gx, l->gy, l->mag);
    else
#endif
        sobel_plain(p, w, h, l->gx, l->gy, l->mag);
    uint32_t total = 0;
    for (int y = 2; y < h - 1; y += 2) {
        const float *m = l->mag + (size_t)y * w;
        int x = 1;
#ifdef __SSE2__
        /* bins of four samples at once: m[x], m[x+2], m[x+4], m[x+6] */
        const __m128 half = _mm_set1_ps(0.5f), top = _mm_set1_ps(63.0f);
        for (; x + 7 < w - 1; x += 8) {
            __m128 ev = _mm_shuffle_ps(_mm_loadu_ps(m + x), _mm_loadu_ps(m + x + 4),
                                       _MM_SHUFFLE(2, 0, 2, 0));
            int32_t bins[4];
            _mm_storeu_si128((__m128i *)bins,
                             _mm_cvttps_epi32(_mm_min_ps(_mm_mul_ps(_mm_sqrt_ps(ev), half), top)));
            /* a histogram per lane: neighbours mostly share a bin, and
             * counting them into one cell waits on each previous count */
            hist4[0][bins[0]]++;
            hist4[1][bins[1]]++;
            hist4[2][bins[2]]++;
            hist4[3][bins[3]]++;
            total += 4;
        }
#endif
        for (; x < w - 1; x += 2) {
            int bin = (int)(sqrtf(m[x]) * 0.5f);
            hist[bin < 63 ? bin : 63]++;
            total++;
        }
    }
    for (int b = 0; b < 64; b++)
        hist[b] += hist4[0][b] + hist4[1][b] + hist4[2][b] + hist4[3][b];
    uint32_t acc = 0;
    int med = 0;
    while (med < 63 && acc + hist[med] < total / 2)
        acc += hist[med++];
    int hi = med;
    while (hi < 63 && acc + hist[hi] < total - total * VOTE_TOP_PCT / 100)
        acc += hist[hi++];
    float thr = 2.0f * (2.0f * med + 1.0f);
    if (thr < T_ABS)
        thr = T_ABS;
    *vote_thr = 2.0f * (hi + 1);
    if (*vote_thr < thr)
        *vote_thr = thr;
    return thr;
}

/* atan2 in degrees from an odd polynomial for atan on [0, 1] (coefficients
 * recalled from memory; measured here to 0.0002 degrees worst case against
 * libm), plenty to pick the Hough bins an edge votes for and much cheaper
 * than atan2f. */
static float atan2_deg(float y, float x)
{
    float ax = fabsf(x), ay = fabsf(y);
    float mx = ax > ay ? ax : ay, mn = ax > ay ? ay : ax;
    if (mx == 0)
        return 0;
    float z = mn / mx, z2 = z * z;
    float r = z * (0.99997726f + z2 * (-0.33262347f + z2 * (0.19354346f +
              z2 * (-0.11643287f + z2 * (0.05265332f - z2 * 0.01172120f)))));
    if (ay > ax)
        r = 1.57079637f - r;
    if (x < 0)
        r = 3.14159274f - r;
    if (y < 0)
        r = -r;
    return r * 57.2957795f;
}

#ifdef __SSE2__
/* Bit i set when p[i] >= t, i = 0..7: most pixels and Hough cells fall
 * below the thresholds, so the loops test eight at once and visit only the
 * rest, in order. */
static inline unsigned at_least8(const float *p, __m128 t)
{
    return (unsigned)_mm_movemask_ps(_mm_cmpge_ps(_mm_loadu_ps(p), t)) |
           (unsigned)_mm_movemask_ps(_mm_cmpge_ps(_mm_loadu_ps(p + 4), t)) << 4;
}
#endif

/* Non-maximum suppression along the quantised gradient at pixel x of row
 * y (m, gx, gy point at the row): appends it to the edge list when it is a
 * maximum; returns the new count. */
static inline int thin_at(coach_level *l, const float *m, const float *gx, const float *gy, int w,
                          int x, int y, int n)
{
    float mm = m[x];
    float ax = fabsf(gx[x]), ay = fabsf(gy[x]);
    int off;
    if (ay <= 0.4142f * ax)
        off = 1;                       /* gradient ~horizontal      */
    else if (ax <= 0.4142f * ay)
        off = w;                       /* gradient ~vertical        */
    else if ((gx[x] > 0) == (gy[x] > 0))
        off = w + 1;
    else
        off = w - 1;
    if (mm < m[x - off] || mm <= m[x + off])
        return n;
    l->edge_idx[n] = y * w + x;
    l->edge_x[n] = (int16_t)x;
    l->edge_y[n] = (int16_t)y;
    return n + 1;
}

/* tan(33 deg): an edge of the horizontal family has a gradient within
 * 33 degrees of vertical, |gx| <= T33 |gy|; the vertical family the
 * converse (a superset of each +-30 degree family; vote() then tests the
 * family exactly).  Checked before the angle is computed. */
#define T33 0.6494076f

/* Thin edges (non-maximum suppression along the quantised gradient). */
static int thin_edges(coach_level *l, int w, int h, float thr)
{
    int n = 0;
    const float thr2 = thr * thr;
#ifdef __SSE2__
    const __m128 t4 = _mm_set1_ps(thr2);
#endif
    for (int y = 2; y < h - 2; y++) {
        const float *m = l->mag + (size_t)y * w;
        const float *gx = l->gx + (size_t)y * w, *gy = l->gy + (size_t)y * w;
        int x = 2;
#ifdef __SSE2__
        for (; x + 8 <= w - 2; x += 8)
            for (unsigned bits = at_least8(m + x, t4); bits; bits &= bits - 1)
                n = thin_at(l, m, gx, gy, w, x + __builtin_ctz(bits), y, n);
#endif
        for (; x < w - 2; x++)
            if (m[x] >= thr2)
                n = thin_at(l, m, gx, gy, w, x, y, n);
    }
    return n;
}

/* One edge's votes: the cells rho = x cos(phi) + y sin(phi) of the angle
 * bins within VOTE_SPREAD of its own bin ic, weight wv. */
static inline void vote_edge(coach_level *l, int fam, float x, float y, float wv, int ic, int nrho)
{
    const float roff = 0.5f * (nrho - 1);
    int i0 = ic - VOTE_SPREAD, i1 = ic + VOTE_SPREAD;
    if (i0 < 0)
        i0 = 0;
    if (i1 > NANG - 1)
        i1 = NANG - 1;
    const float *cv = l->cosv[fam], *sv = l->sinv[fam];
    float *arow = l->acc + ((size_t)fam * NANG + (size_t)i0) * nrho;
    const float rx = roff + 0.5f; /* rho >= 0 after the offset: truncation rounds */
#ifdef __SSE2__
    /* The rho cells four angles at a time (the same products and sums
     * per lane; the tables are padded past the last angle). */
    int32_t ir[2 * VOTE_SPREAD + 4];
    const __m128 xv = _mm_set1_ps(x), yv = _mm_set1_ps(y), rv = _mm_set1_ps(rx);
    for (int t = 0; t <= i1 - i0; t += 4) {
        __m128 r = _mm_add_ps(_mm_add_ps(_mm_mul_ps(xv, _mm_loadu_ps(cv + i0 + t)),
                                         _mm_mul_ps(yv, _mm_loadu_ps(sv + i0 + t))), rv);
        _mm_storeu_si128((__m128i *)(ir + t), _mm_cvttps_epi32(r));
    }
    for (int t = 0; t <= i1 - i0; t++, arow += nrho)
        arow[ir[t]] += wv;
#else
    for (int i = i0; i <= i1; i++, arow += nrho)
        arow[(int)(x * cv[i] + y * sv[i] + rx)] += wv;
#endif
}

#ifdef __SSE2__
static inline __m128 sel(__m128 mask, __m128 a, __m128 b) /* mask ? a : b */
{
    return _mm_or_ps(_mm_and_ps(mask, a), _mm_andnot_ps(mask, b));
}

/* For four edges at once, what vote() works out for each before voting:
 * atan2_deg, the fold, the family test, the bin and the weight, lane by
 * lane the same operations (branches become selects).  Returns the lanes
 * that vote for family `only` as bits. */
static unsigned vote_prep4(__m128 gx, __m128 gy, __m128 mag2, int only, float cap, int ic[4],
                           float wv[4])
{
    const __m128 sign = _mm_set1_ps(-0.0f), zero = _mm_setzero_ps();
    const __m128 ax = _mm_andnot_ps(sign, gx), ay = _mm_andnot_ps(sign, gy);
    const __m128 t33 = _mm_set1_ps(T33);
    const __m128 pass = only == FAM_H ? _mm_cmple_ps(ax, _mm_mul_ps(t33, ay))
                                      : _mm_cmple_ps(ay, _mm_mul_ps(t33, ax));
    if (!_mm_movemask_ps(pass))
        return 0;
    /* atan2_deg */
    const __m128 gt = _mm_cmpgt_ps(ax, ay);
    const __m128 mx = sel(gt, ax, ay), mn = sel(gt, ay, ax);
    const __m128 z = _mm_div_ps(mn, mx), z2 = _mm_mul_ps(z, z);
    __m128 p = _mm_sub_ps(_mm_set1_ps(0.05265332f), _mm_mul_ps(z2, _mm_set1_ps(0.01172120f)));
    p = _mm_add_ps(_mm_set1_ps(-0.11643287f), _mm_mul_ps(z2, p));
    p = _mm_add_ps(_mm_set1_ps(0.19354346f), _mm_mul_ps(z2, p));
    p = _mm_add_ps(_mm_set1_ps(-0.33262347f), _mm_mul_ps(z2, p));
    p = _mm_add_ps(_mm_set1_ps(0.99997726f), _mm_mul_ps(z2, p));
    __m128 r = _mm_mul_ps(z, p);
    r = sel(_mm_cmpgt_ps(ay, ax), _mm_sub_ps(_mm_set1_ps(1.57079637f), r), r);
    r = sel(_mm_cmplt_ps(gx, zero), _mm_sub_ps(_mm_set1_ps(3.14159274f), r), r);
    r = sel(_mm_cmplt_ps(gy, zero), _mm_xor_ps(r, sign), r);
    __m128 ang = sel(_mm_cmpeq_ps(mx, zero), zero, _mm_mul_ps(r, _mm_set1_ps(57.2957795f)));
    /* fold to a line normal in [-90, 90) */
    ang = sel(_mm_cmpge_ps(ang, _mm_set1_ps(90.0f)), _mm_sub_ps(ang, _mm_set1_ps(180.0f)),
              sel(_mm_cmplt_ps(ang, _mm_set1_ps(-90.0f)), _mm_add_ps(ang, _mm_set1_ps(180.0f)), ang));
    const __m128 lim = _mm_set1_ps((float)(FAM_HALF_DEG + 3.0));
    const __m128 is_v = _mm_cmple_ps(_mm_andnot_ps(sign, ang), lim);
    const __m128 alpha_h = sel(_mm_cmpgt_ps(ang, zero), _mm_sub_ps(ang, _mm_set1_ps(90.0f)),
                               _mm_add_ps(ang, _mm_set1_ps(90.0f)));
    const __m128 ok = only == FAM_V ? is_v
                      : _mm_andnot_ps(is_v, _mm_cmple_ps(_mm_andnot_ps(sign, alpha_h), lim));
    const __m128 alpha = sel(is_v, ang, alpha_h);
    const __m128 m = _mm_sqrt_ps(mag2), capv = _mm_set1_ps(cap);
    _mm_storeu_ps(wv, sel(_mm_cmplt_ps(m, capv), m, capv));
    const __m128 bin = _mm_add_ps(_mm_mul_ps(_mm_add_ps(alpha, _mm_set1_ps((float)FAM_HALF_DEG)),
                                             _mm_set1_ps(1.0f / (float)BIN_DEG)),
                                  _mm_set1_ps(0.5f));
    _mm_storeu_si128((__m128i *)ic, _mm_cvttps_epi32(bin));
    return (unsigned)_mm_movemask_ps(_mm_and_ps(pass, ok));
}
#endif

/* Votes the edges of one family (the other family's are skipped, so a
 * frame with a horizon never pays for the vertical family). */
static void vote(coach_level *l, int w, int h, int nedge, float thr, int nrho, int only)
{
    const float cx = 0.5f * (w - 1), cy = 0.5f * (h - 1);
    const float cap = 3.0f * thr;
    memset(l->acc + (size_t)only * NANG * nrho, 0, (size_t)NANG * nrho * sizeof(float));
    int e = 0;
#ifdef __SSE2__
    for (; e + 4 <= nedge; e += 4) {
        const int *id = l->edge_idx + e;
        int ic[4];
        float wv[4];
        unsigned bits = vote_prep4(
            _mm_setr_ps(l->gx[id[0]], l->gx[id[1]], l->gx[id[2]], l->gx[id[3]]),
            _mm_setr_ps(l->gy[id[0]], l->gy[id[1]], l->gy[id[2]], l->gy[id[3]]),
            _mm_setr_ps(l->mag[id[0]], l->mag[id[1]], l->mag[id[2]], l->mag[id[3]]), only, cap,
            ic, wv);
        for (; bits; bits &= bits - 1) {
            const int q = __builtin_ctz(bits);
            vote_edge(l, only, (float)l->edge_x[e + q] - cx, (float)l->edge_y[e + q] - cy, wv[q],
                      ic[q], nrho);
        }
    }
#endif
    for (; e < nedge; e++) { /* the rest, one at a time */
        int idx = l->edge_idx[e];
        float gxv = l->gx[idx], gyv = l->gy[idx];
        if (only == FAM_H ? fabsf(gxv) > T33 * fabsf(gyv) : fabsf(gyv) > T33 * fabsf(gxv))
            continue;
        float ang = atan2_deg(gyv, gxv);
        /* Fold the gradient direction to a line normal in [-90, 90). */
        if (ang >= 90.0f)
            ang -= 180.0f;
        else if (ang < -90.0f)
            ang += 180.0f;
        int fam;
        float alpha;
        if (fabsf(ang) <= FAM_HALF_DEG + 3.0f) {
            fam = FAM_V;
            alpha = ang;
        } else {
            fam = FAM_H;
            alpha = ang > 0 ? ang - 90.0f : ang + 90.0f;
            if (fabsf(alpha) > FAM_HALF_DEG + 3.0f)
                continue;
        }
        if (fam != only)
            continue;
        float m = sqrtf(l->mag[idx]);
        int ic = (int)((alpha + (float)FAM_HALF_DEG) * (1.0f / (float)BIN_DEG) + 0.5f);
        vote_edge(l, fam, (float)l->edge_x[e] - cx, (float)l->edge_y[e] - cy, m < cap ? m : cap, ic,
                  nrho);
    }
}

/* Cell r of angle row i when it is a local maximum of at least min_votes:
 * inserted into cand (strongest first, at most MAX_PEAKS * 2); returns the
 * new count. */
static inline int peak_at(const float *acc, int nrho, int i, int r, float min_votes, peak *cand,
                          int nc)
{
    const int cmax = MAX_PEAKS * 2;
    const float *row = acc + (size_t)i * nrho;
    float v = row[r];
    if (v < min_votes || v < row[r - 1] || v <= row[r + 1])
        return nc;
    if (nc == cmax && v <= cand[nc - 1].votes)
        return nc;
    for (int di = -1; di <= 1; di += 2) {
        int ii = i + di;
        if (ii < 0 || ii >= NANG)
            continue;
        const float *o = acc + (size_t)ii * nrho + r;
        if (o[-1] > v || o[0] > v || o[1] > v)
            return nc;
    }
    int k = nc < cmax ? nc++ : cmax - 1;
    while (k > 0 && cand[k - 1].votes < v) {
        cand[k] = cand[k - 1];
        k--;
    }
    cand[k] = (peak){v, i, r};
    return nc;
}

/* Local maxima of one family above min_votes, strongest first, then
 * greedy suppression of peaks within +-2 degrees and +-6 pixels. */
static int find_peaks(const coach_level *l, int fam, int nrho, float min_votes, peak *out, int maxp)
{
    const float *acc = l->acc + (size_t)fam * NANG * nrho;
    peak cand[MAX_PEAKS * 2];
    int nc = 0;
#ifdef __SSE2__
    const __m128 mv4 = _mm_set1_ps(min_votes);
#endif
    for (int i = 0; i < NANG; i++) {
        int r = 1;
#ifdef __SSE2__
        const float *row = acc + (size_t)i * nrho;
        for (; r + 8 <= nrho - 1; r += 8)
            for (unsigned bits = at_least8(row + r, mv4); bits; bits &= bits - 1)
                nc = peak_at(acc, nrho, i, r + __builtin_ctz(bits), min_votes, cand, nc);
#endif
        for (; r < nrho - 1; r++)
            nc = peak_at(acc, nrho, i, r, min_votes, cand, nc);
    }
    int np = 0;
    for (int c = 0; c < nc && np < maxp; c++) {
        int dup = 0;
        for (int q = 0; q < np && !dup; q++)
            if (abs(cand[c].ia - out[q].ia) <= 4 && abs(cand[c].ir - out[q].ir) <= 6)
                dup = 1;
        if (!dup)
            out[np++] = cand[c];
    }
    return np;
}

/* Sub-bin position of a peak from parabolas through its neighbours. */
static void peak_subbin(const coach_level *l, int fam, int nrho, const peak *p, double *alpha_deg,
                        double *rho_c)
{
    const float *acc = l->acc + (size_t)fam * NANG * nrho;
    double da = 0, dr = 0;
    float c = acc[(size_t)p->ia * nrho + p->ir];
    if (p->ia > 0 && p->ia < NANG - 1) {
        float a = acc[(size_t)(p->ia - 1) * nrho + p->ir], b = acc[(size_t)(p->ia + 1) * nrho + p->ir];
        double den = a - 2.0 * c + b;
        if (den < 0)
            da = 0.5 * (a - b) / den;
    }
    {
        float a = acc[(size_t)p->ia * nrho + p->ir - 1], b = acc[(size_t)p->ia * nrho + p->ir + 1];
        double den = a - 2.0 * c + b;
        if (den < 0)
            dr = 0.5 * (a - b) / den;
    }
    *alpha_deg = (p->ia + da) * BIN_DEG - FAM_HALF_DEG;
    *rho_c = p->ir + dr - 0.5 * (nrho - 1);
}

/* Locates the edge along a line of one family and fits it.  In the
 * horizontal family "along" is x and "across" is y; in the vertical family
 * the roles swap.  The line is rho = X cos(phi) + Y sin(phi) in centred
 * coordinates.  Only the longest run of present positions with gaps of at
 * most max_gap is fitted: a wall edge is one short run, a horizon a long
 * one that may be interrupted by a boat. */
static void fit_line(coach_level *l, int w, int h, int fam, double alpha_deg, double rho_c,
                     float thr, int max_gap, line_fit *out)
{
    memset(out, 0, sizeof *out);
    const double phi = ((fam == FAM_H) ? 90.0 : 0.0) + alpha_deg;
    const double cph = cos(phi * M_PI / 180.0), sph = sin(phi * M_PI / 180.0);
    const double cx = 0.5 * (w - 1), cy = 0.5 * (h - 1);
    const int nal = fam == FAM_H ? w : h, nac = fam == FAM_H ? h : w;
    const double cal = fam == FAM_H ? cx : cy, cac = fam == FAM_H ? cy : cx;
    /* across = cac + (rho - (along - cal) * c_al) / c_ac */
    const double c_al = fam == FAM_H ? cph : sph, c_ac = fam == FAM_H ? sph : cph;
    const int st_al = fam == FAM_H ? 1 : w, st_ac = fam == FAM_H ? w : 1;
    const int R = 3, C = 2;
    /* Polarity: the sign of the gradient along the normal on the line. */
    double pol = 0;
    for (int u = 2; u < nal - 2; u += 4) {
        double v0 = cac + (rho_c - (u - cal) * c_al) / c_ac;
        int vi = (int)floor(v0 + 0.5);
        if (vi < 2 || vi > nac - 3)
            continue;
        int idx = u * st_al + vi * st_ac;
        pol += l->gx[idx] * cph + l->gy[idx] * sph;
    }
    const float sgn = pol >= 0 ? 1.0f : -1.0f;
    int span = 0;
    for (int u = 2; u < nal - 2; u++) {
        double v0 = cac + (rho_c - (u - cal) * c_al) / c_ac;
        int vi = (int)floor(v0 + 0.5);
        l->wt[u] = 0;
        if (vi < 2 || vi > nac - 3)
            continue;
        span++;
        float best = 0;
        int bv = -1;
        for (int v = vi - R; v <= vi + R; v++) {
            if (v < 1 || v > nac - 2)
                continue;
            int idx = u * st_al + v * st_ac;
            float e = sgn * (l->gx[idx] * (float)cph + l->gy[idx] * (float)sph);
            if (e > best) {
                best = e;
                bv = v;
            }
        }
        if (bv < 0 || best < thr)
            continue;
        double sw = 0, sv = 0;
        for (int v = bv - C; v <= bv + C; v++) {
            if (v < 1 || v > nac - 2)
                continue;
            int idx = u * st_al + v * st_ac;
            float e = sgn * (l->gx[idx] * (float)cph + l->gy[idx] * (float)sph);
            if (e <= 0)
                continue;
            sw += e;
            sv += e * v;
        }
        l->pos[u] = (float)(sv / sw);
        l->wt[u] = best;
    }
    out->span = span;
    if (span < 8)
        return;
    int u0, u1;
    {
        int bs = -1, be = -1, s = -1, last = -1000000;
        for (int u = 2; u < nal - 2; u++) {
            if (l->wt[u] <= 0)
                continue;
            if (u - last > max_gap + 1)
                s = u;
            last = u;
            if (u - s > be - bs) {
                bs = s;
                be = u;
            }
        }
        if (bs < 0)
            return;
        u0 = bs;
        u1 = be;
    }
    out->extent = u1 - u0 + 1;
    for (int u = u0; u <= u1; u++)
        l->keep[u] = l->wt[u] > 0;
    /* Robust weighted least squares: refit without outliers. */
    double a = 0, b = 0, rms = 0;
    int used = 0;
    for (int it = 0; it < 4; it++) {
        double S = 0, Su = 0, Sv = 0, Suu = 0, Suv = 0;
        used = 0;
        for (int u = u0; u <= u1; u++) {
            if (!l->keep[u])
                continue;
            double ww = l->wt[u], uu = u - cal, vv = l->pos[u];
            S += ww;
            Su += ww * uu;
            Sv += ww * vv;
            Suu += ww * uu * uu;
            Suv += ww * uu * vv;
            used++;
        }
        double den = S * Suu - Su * Su;
        if (used < 8 || den <= 0)
            return;
        b = (S * Suv - Su * Sv) / den;
        a = (Sv - b * Su) / S;
        double sr = 0;
        for (int u = u0; u <= u1; u++) {
            if (!l->keep[u])
                continue;
            double r = l->pos[u] - (a + b * (u - cal));
            sr += l->wt[u] * r * r;
        }
        rms = sqrt(sr / S);
        double lim = 2.5 * rms > 0.5 ? 2.5 * rms : 0.5;
        int dropped = 0;
        for (int u = u0; u <= u1; u++) {
            if (!l->keep[u])
                continue;
            double r = l->pos[u] - (a + b * (u - cal));
            if (fabs(r) > lim) {
                l->keep[u] = 0;
                dropped++;
            }
        }
        if (!dropped)
            break;
    }
    double wsum = 0;
    used = 0;
    for (int u = u0; u <= u1; u++)
        if (l->keep[u]) {
            wsum += l->wt[u];
            used++;
        }
    out->ok = 1;
    out->a = a - b * cal;  /* back to uncentred "along" coordinates */
    out->b = b;
    out->present = used;
    out->rms = rms;
    out->weight = wsum;
    /* Image y points down: a horizon whose right end is higher has
     * dy/dx < 0; a vertical whose top leans left (the same camera roll)
     * has dx/dy > 0. */
    out->tilt_deg = (fam == FAM_H ? -atan(b) : atan(b)) * 180.0 / M_PI;
}

static double clamp01(double v) { return v < 0 ? 0 : v > 1 ? 1 : v; }

static void set_peak(coach_level_est *out, int fam, double alpha_deg, double rho_c, int w, int h)
{
    double phi = (fam == FAM_H ? 90.0 : 0.0) + alpha_deg;
    double c = cos(phi * M_PI / 180.0), s = sin(phi * M_PI / 180.0);
    double rho = rho_c + 0.5 * (w - 1) * c + 0.5 * (h - 1) * s;
    if (phi < 0) {
        phi += 180.0;
        rho = -rho;
    }
    out->has_peak = 1;
    out->peak_theta_deg = phi;
    out->peak_rho = rho;
}

typedef struct peak_est { int ok; double alpha, rho; } peak_est;

/* The vertical family.  Upright lines seen by a camera that pitches up or
 * down converge to a vanishing point (Hartley & Zisserman, Multiple View
 * Geometry, ch. 8), so their slopes dx/dy grow linearly with where they
 * cross the middle row: b_i = b0 + k * c_i with c_i their offset from the
 * centre column.  The roll is the direction of that vanishing point seen
 * from the image centre, i.e. the slope b0 a line would have through the
 * centre.  A weighted least-squares fit with outlier rejection gives b0;
 * with the lines bunched together (no spread in c) the slope of their
 * weighted mean is used.  Returns 1 with the tilt, a confidence, the
 * number of lines kept and the strongest fitted peak. */
static int verticals(coach_level *l, int w, int h, int nrho, float thr, double *tilt_out,
                     double *conf, int *nout, peak_est *pe)
{
    peak pk[MAX_PEAKS];
    int np = find_peaks(l, FAM_V, nrho, 0.12f * h * thr, pk, MAX_VERT_LINES);
    double b[MAX_VERT_LINES], c[MAX_VERT_LINES], wt[MAX_VERT_LINES];
    int keep[MAX_VERT_LINES];
    int nl = 0;
    const double cx = 0.5 * (w - 1), cy = 0.5 * (h - 1);
    pe->ok = 0;
    for (int i = 0; i < np; i++) {
        double al, rc;
        peak_subbin(l, FAM_V, nrho, &pk[i], &al, &rc);
        line_fit f;
        fit_line(l, w, h, FAM_V, al, rc, thr, 3, &f);
        if (!f.ok || f.rms > 0.75 || f.present < 0.15 * h)
            continue;
        if (nl == 0)
            *pe = (peak_est){1, al, rc};
        b[nl] = f.b;
        c[nl] = (f.a + f.b * cy - cx) / w;
        wt[nl] = f.weight;
        keep[nl] = 1;
        nl++;
    }
    if (nl == 0)
        return 0;
    double b0 = 0, k = 0, rms = 0, tot = 0, kept_w = 0;
    int nk = 0;
    for (int i = 0; i < nl; i++)
        tot += wt[i];
    for (int it = 0; it < 4; it++) {
        double S = 0, Sc = 0, Sb = 0, Scc = 0, Scb = 0;
        nk = 0;
        for (int i = 0; i < nl; i++) {
            if (!keep[i])
                continue;
            S += wt[i];
            Sc += wt[i] * c[i];
            Sb += wt[i] * b[i];
            Scc += wt[i] * c[i] * c[i];
            Scb += wt[i] * c[i] * b[i];
            nk++;
        }
        if (nk == 0)
            return 0;
        double mc = Sc / S, var = Scc / S - mc * mc;
        if (nk >= 3 && var > 0.15 * 0.15) {
            k = (Scb / S - mc * Sb / S) / var;
            b0 = Sb / S - k * mc;
        } else {
            k = 0;
            b0 = Sb / S;
        }
        double sr = 0;
        for (int i = 0; i < nl; i++)
            if (keep[i]) {
                double r = b[i] - (b0 + k * c[i]);
                sr += wt[i] * r * r;
            }
        rms = sqrt(sr / S);
        /* Lines off the common vanishing point by more than about half a
         * degree (or 2.5 rms) are not upright structure. */
        double lim = 2.5 * rms > 0.009 ? 2.5 * rms : 0.009;
        int dropped = 0;
        for (int i = 0; i < nl; i++)
            if (keep[i] && fabs(b[i] - (b0 + k * c[i])) > lim) {
                keep[i] = 0;
                dropped++;
            }
        if (!dropped)
            break;
    }
    nk = 0;
    kept_w = 0;
    for (int i = 0; i < nl; i++)
        if (keep[i]) {
            nk++;
            kept_w += wt[i];
        }
    if (nl >= 2 && nk < 2)
        return 0;
    *tilt_out = atan(b0) * 180.0 / M_PI;
    *nout = nk;
    *conf = clamp01(kept_w / tot) * clamp01(nk / 3.0) * clamp01(1.0 - rms / 0.035);
    return 1;
}

void coach_level_run(coach_level *l, const float *luma, int w, int h, coach_level_est *out)
{
    memset(out, 0, sizeof *out);
    out->source = COACH_LEVEL_NONE;
    if (!l || w < 16 || h < 16 || w > l->max_w || h > l->max_h)
        return;
    const int nrho = (int)ceil(sqrt((double)w * w + (double)h * h)) + 3;
    float vthr;
    float thr = gradients(l, luma, w, h, &vthr);
    int nedge = thin_edges(l, w, h, vthr);
    if (nedge < 16)
        return;
    vote(l, w, h, nedge, thr, nrho, FAM_H);

    /* Horizontal family: the candidate that crosses most of the width. */
    peak pk[MAX_PEAKS];
    int np = find_peaks(l, FAM_H, nrho, 0.3f * w * thr, pk, 4);
    line_fit best;
    memset(&best, 0, sizeof best);
    double best_score = 0;
    for (int i = 0; i < np; i++) {
        double al, rc;
        peak_subbin(l, FAM_H, nrho, &pk[i], &al, &rc);
        if (i == 0)
            set_peak(out, FAM_H, al, rc, w, h);
        line_fit f;
        /* A horizon crosses the frame: its run spans most of the width,
         * with gaps of up to a fifth of it (a boat, a figure). */
        fit_line(l, w, h, FAM_H, al, rc, thr, w / 5, &f);
        if (!f.ok || f.rms > 0.75 || f.span < 0.6 * w || f.extent < 0.75 * f.span ||
            f.present < 0.5 * f.extent)
            continue;
        if (f.weight > best_score) {
            best_score = f.weight;
            best = f;
            set_peak(out, FAM_H, al, rc, w, h);
        }
    }
    /* A strongly sloping "horizon" may be a receding line (a facade's
     * floors, a road edge) rather than the horizon: when the verticals
     * agree among themselves but not with it, they win — under a true roll
     * a horizon and the verticals lean together. */
    peak_est vpk = {0, 0, 0};
    int have_vert = 0;
    double vtilt = 0, vconf = 0;
    int vn = 0;
    if (!best.ok || fabs(best.tilt_deg) > 5.0) {
        vote(l, w, h, nedge, thr, nrho, FAM_V);
        have_vert = verticals(l, w, h, nrho, thr, &vtilt, &vconf, &vn, &vpk);
    }
    if (best.ok && !(have_vert && vn >= 3 && vconf >= 0.5 && fabs(vtilt - best.tilt_deg) > 3.0)) {
        out->has_tilt = 1;
        out->tilt_deg = best.tilt_deg;
        out->source = COACH_LEVEL_HORIZON;
        out->has_horizon = 1;
        out->horizon_a = best.a;
        out->horizon_b = best.b;
        out->nlines = 1;
        out->confidence = clamp01((double)best.present / best.span) * clamp01(1.25 - best.rms);
        return;
    }
    if (!have_vert)
        return;
    if (vpk.ok)
        set_peak(out, FAM_V, vpk.alpha, vpk.rho, w, h);
    out->has_tilt = 1;
    out->tilt_deg = vtilt;
    out->source = COACH_LEVEL_VERTICALS;
    out->nlines = vn;
    out->confidence = vconf;
}
