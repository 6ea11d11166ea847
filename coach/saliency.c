/* Saliency and what follows from it: the main subject, visual balance and
 * salient mass cut by the frame's edges.
 *
 * The map is the spectral residual of Hou & Zhang (CVPR 2007): at 64x64,
 * the log amplitude spectrum minus its 3x3 local mean is the "unexpected"
 * part of the spectrum; transformed back with the original phase, squared
 * and smoothed, it marks what stands out from the scene's statistics.  It
 * is taken of the image's periodic component (Moisan 2011), so the seams of
 * the DFT's implicit tiling are not salient.  The object map is the map
 * above three times its mean (the paper's threshold); its group of nearby
 * regions with the most saliency is the subject, unless a region differs
 * in colour from the whole border (boundary contrast, below), which then
 * locates the subject.  Balance is the saliency's lever about the centre;
 * intrusions are salient regions cut by a side of the frame.
 *
 * Where the time goes (callgrind, bench build, 320x180 analysis image of the
 * 1080p harbour demo, per frame): 3.3 M instructions when each plane was
 * resampled on its own (1.2 M for the four) and the FFTs took one pass per
 * stage; 2.1 M now: the four planes resampled in one pass 0.54 M (its time
 * is mostly reading the 0.9 MB of planes), the two 64x64 FFTs 0.2 M,
 * logf/expf over the spectrum 0.26 M, boundary contrast ~0.15 M (border
 * medians 0.1 M), the rest small 4096-cell loops.
 */
#include <math.h>
#include <stdlib.h>
#include <string.h>
#ifdef __SSE2__
#include <xmmintrin.h>
#endif

#include "coach/coach_internal.h"

COACH_O3

#define N COACH_SAL_N
#define NN (N * N)

/* Regions of the object map closer than this (cells) form one subject. */
#define MERGE_GAP 3
/* Colour distance (8-bit RGB units) from every border piece for a subject
 * to be taken from the boundary contrast. */
#define MIN_BOUNDARY_CONTRAST 40.0f
#define MAX_CAND 48
/* A region this long (cells, three quarters of the map) spans the frame. */
#define SPAN_CELLS (3 * N / 4)

/* Area-weighted resampling: output sample j covers source samples
 * [j n/N, (j+1) n/N); the samples it partly covers count by the overlap. */
typedef struct span { int i0, i1; float w0, w1; } span; /* first/last sample and their weights */

typedef struct region {
    double mass, sx, sy;
    int x0, y0, x1, y1;
    unsigned sides;
    int parent;
} region;

struct coach_saliency {
    int max_w, max_h;
    coach_fft_plan plan;
    float *rows;           /* the planes resampled down the columns: one row
                              of 4 x max_w, interleaved (luma, r, g, b per
                              pixel); N x max_w for one plane without SSE */
    int span_w, span_h;    /* the size the spans below were made for       */
    span sx[N], sy[N];
    float small[NN];       /* luma at N x N                              */
    float cx[2 * NN];      /* complex work                               */
    float scratch[2 * NN];
    float cos2[N];                /* 2 cos(2 pi q / N)                   */
    float pad[(N + 4) * (N + 4)];
    region *regions;       /* the MAX_CAND heaviest regions             */
    float la[NN], lb[NN];  /* log amplitude, its local mean              */
    float map[NN];
    float cr[NN], cg[NN], cb[NN]; /* colour at N x N                     */
    float bmap[NN];               /* boundary contrast                    */
    int16_t label[NN];
    int16_t stack[NN];
};

coach_saliency *coach_saliency_create(int max_w, int max_h)
{
    if (max_w < 1 || max_h < 1)
        return NULL;
    coach_saliency *s = calloc(1, sizeof *s);
    if (!s)
        return NULL;
    s->max_w = max_w;
    s->max_h = max_h;
#ifdef __SSE2__
    s->rows = malloc((size_t)max_w * 4 * sizeof(float));
#else
    s->rows = malloc((size_t)max_w * N * sizeof(float));
#endif
    s->regions = malloc(MAX_CAND * sizeof(region));
    for (int q = 0; q < N; q++)
        s->cos2[q] = (float)(2.0 * cos(2.0 * M_PI * q / N));
    if (!s->rows || !s->regions || coach_fft_plan_init(&s->plan, N) != 0) {
        coach_saliency_destroy(s);
        return NULL;
    }
    return s;
}

void coach_saliency_destroy(coach_saliency *s)
{
    if (!s)
        return;
    free(s->rows);
    free(s->regions);
    free(s);
}

static void make_spans(int n, span *sp)
{
    const double f = (double)n / N;
    for (int j = 0; j < N; j++) {
        double x0 = j * f, x1 = x0 + f;
        int i0 = (int)x0, i1 = (int)ceil(x1) - 1;
        if (i1 > n - 1)
            i1 = n - 1;
        if (i1 < i0)
            i1 = i0;
        sp[j].i0 = i0;
        sp[j].i1 = i1;
        if (i0 == i1) {
            sp[j].w0 = (float)(x1 - x0);
            sp[j].w1 = 0;
        } else {
            sp[j].w0 = (float)(i0 + 1 - x0);
            sp[j].w1 = (float)(x1 - i1);
        }
    }
}

/* The spans of a w x h image, made again only when the size changes. */
static void set_spans(coach_saliency *s, int w, int h)
{
    if (s->span_w == w && s->span_h == h)
        return;
    make_spans(w, s->sx);
    make_spans(h, s->sy);
    s->span_w = w;
    s->span_h = h;
}

#ifdef __SSE2__
/* One output sample of a span, four lanes: w0 * first + wm * (each middle
 * sample, in order) + w1 * last, the samples `step` floats apart; nmid = -1
 * for a span within one sample (first only).  The common lengths unrolled.
 * wm = 1 multiplies exactly, so the pass along the rows, whose middle
 * samples count unweighted, uses it too. */
static inline __attribute__((always_inline)) __m128 span_sum(const float *first, const float *last, size_t step, int nmid,
                              __m128 w0, __m128 wm, __m128 w1)
{
    __m128 acc = _mm_mul_ps(w0, _mm_loadu_ps(first));
    if (nmid < 0)
        return acc;
    switch (nmid) {
    case 4:
        acc = _mm_add_ps(acc, _mm_mul_ps(wm, _mm_loadu_ps(first + step)));
        acc = _mm_add_ps(acc, _mm_mul_ps(wm, _mm_loadu_ps(first + 2 * step)));
        acc = _mm_add_ps(acc, _mm_mul_ps(wm, _mm_loadu_ps(first + 3 * step)));
        acc = _mm_add_ps(acc, _mm_mul_ps(wm, _mm_loadu_ps(first + 4 * step)));
        break;
    case 3:
        acc = _mm_add_ps(acc, _mm_mul_ps(wm, _mm_loadu_ps(first + step)));
        acc = _mm_add_ps(acc, _mm_mul_ps(wm, _mm_loadu_ps(first + 2 * step)));
        acc = _mm_add_ps(acc, _mm_mul_ps(wm, _mm_loadu_ps(first + 3 * step)));
        break;
    case 2:
        acc = _mm_add_ps(acc, _mm_mul_ps(wm, _mm_loadu_ps(first + step)));
        acc = _mm_add_ps(acc, _mm_mul_ps(wm, _mm_loadu_ps(first + 2 * step)));
        break;
    case 1:
        acc = _mm_add_ps(acc, _mm_mul_ps(wm, _mm_loadu_ps(first + step)));
        break;
    case 0:
        break;
    default:
        for (int i = 1; i <= nmid; i++)
            acc = _mm_add_ps(acc, _mm_mul_ps(wm, _mm_loadu_ps(first + i * step)));
    }
    return _mm_add_ps(acc, _mm_mul_ps(w1, _mm_loadu_ps(last)));
}

/* Pixels 0 .. (w & ~3) - 1 of one output row of the pass down the columns
 * into o, interleaved; returns the first pixel not done. */
static inline __attribute__((always_inline)) int
rows_span(const float *const src[4], size_t o0, size_t o1, int w, int nmid, __m128 vw0,
          __m128 vay, __m128 vw1, float *restrict o)
{
    int x = 0;
    for (; x + 4 <= w; x += 4) {
        __m128 v[4];
        for (int c = 0; c < 4; c++)
            v[c] = span_sum(src[c] + x + o0, src[c] + x + o1, w, nmid, vw0, vay, vw1);
        _MM_TRANSPOSE4_PS(v[0], v[1], v[2], v[3]);
        for (int c = 0; c < 4; c++)
            _mm_storeu_ps(o + 4 * (x + c), v[c]);
    }
    return x;
}

/* Resamples four w x h planes (luma, r, g, b) to N x N at once: first down
 * the columns, all four planes of four pixels a time, stored interleaved
 * (s->rows, pixel-major), so that the pass along the N short rows handles
 * the four planes as the four lanes of one vector.  Per lane the products
 * and sums are those of the plain one-plane-at-a-time resampling, in the
 * same order, so the results are the same. */
static void resample4(coach_saliency *s, const float *const src[4], int w, int h,
                      float *const dst[4])
{
    set_spans(s, w, h);
    const float ax = (float)N / w, ay = (float)N / h;
    const __m128 vay = _mm_set1_ps(ay), vax = _mm_set1_ps(ax), one = _mm_set1_ps(1.0f);
    for (int j = 0; j < N; j++) {
        const span *p = &s->sy[j];
        float *restrict o = s->rows; /* one row: it stays in the L1 cache */
        const float w0 = p->w0 * ay, w1 = p->w1 * ay;
        const __m128 vw0 = _mm_set1_ps(w0), vw1 = _mm_set1_ps(w1);
        const size_t o0 = (size_t)p->i0 * w, o1 = (size_t)p->i1 * w;
        int x;
        const int nmid = p->i1 - p->i0 - 1; /* -1: one source row */
        /* the span length as a constant in each copy of the loop */
        switch (nmid) {
        case -1: x = rows_span(src, o0, o1, w, -1, vw0, vay, vw1, o); break;
        case 0: x = rows_span(src, o0, o1, w, 0, vw0, vay, vw1, o); break;
        case 1: x = rows_span(src, o0, o1, w, 1, vw0, vay, vw1, o); break;
        case 2: x = rows_span(src, o0, o1, w, 2, vw0, vay, vw1, o); break;
        case 3: x = rows_span(src, o0, o1, w, 3, vw0, vay, vw1, o); break;
        default: x = rows_span(src, o0, o1, w, nmid, vw0, vay, vw1, o);
        }
        for (; x < w; x++)
            for (int c = 0; c < 4; c++) {
                const float *sc = src[c] + x;
                float acc = w0 * sc[o0];
                if (p->i1 > p->i0) {
                    for (int i = p->i0 + 1; i < p->i1; i++)
                        acc += ay * sc[(size_t)i * w];
                    acc += w1 * sc[o1];
                }
                o[4 * x + c] = acc;
            }
        /* this output row along the rows at once, while it is in cache */
        const float *r = s->rows;
        for (int jx = 0; jx < N; jx += 4) {
            __m128 v[4];
            for (int q = 0; q < 4; q++) {
                const span *sp = &s->sx[jx + q];
                __m128 acc = span_sum(r + 4 * sp->i0, r + 4 * sp->i1, 4, sp->i1 - sp->i0 - 1,
                                      _mm_set1_ps(sp->w0), one, _mm_set1_ps(sp->w1));
                v[q] = _mm_mul_ps(acc, vax);
            }
            _MM_TRANSPOSE4_PS(v[0], v[1], v[2], v[3]);
            for (int c = 0; c < 4; c++)
                _mm_storeu_ps(dst[c] + (size_t)j * N + jx, v[c]);
        }
    }
}
#else
/* Resamples a w x h plane to N x N: first down the columns, whole rows at
 * a time (N x w into s->rows, contiguous and vectorisable), then along the
 * N short rows. */
static void resample_plane(coach_saliency *s, const float *src, int w, int h, float *dst)
{
    const float ax = (float)N / w, ay = (float)N / h;
    for (int j = 0; j < N; j++) {
        const span *p = &s->sy[j];
        float *restrict o = s->rows + (size_t)j * w;
        const float *r0 = src + (size_t)p->i0 * w;
        const float w0 = p->w0 * ay, w1 = p->w1 * ay;
        for (int x = 0; x < w; x++)
            o[x] = w0 * r0[x];
        if (p->i1 > p->i0) {
            for (int i = p->i0 + 1; i < p->i1; i++) {
                const float *r = src + (size_t)i * w;
                for (int x = 0; x < w; x++)
                    o[x] += ay * r[x];
            }
            const float *r1 = src + (size_t)p->i1 * w;
            for (int x = 0; x < w; x++)
                o[x] += w1 * r1[x];
        }
    }
    for (int y = 0; y < N; y++) {
        const float *r = s->rows + (size_t)y * w;
        float *o = dst + (size_t)y * N;
        for (int j = 0; j < N; j++) {
            const span *p = &s->sx[j];
            float acc = p->w0 * r[p->i0];
            if (p->i1 > p->i0) {
                for (int i = p->i0 + 1; i < p->i1; i++)
                    acc += r[i];
                acc += p->w1 * r[p->i1];
            }
            o[j] = acc * ax;
        }
    }
}

static void resample4(coach_saliency *s, const float *const src[4], int w, int h,
                      float *const dst[4])
{
    set_spans(s, w, h);
    for (int c = 0; c < 4; c++)
        resample_plane(s, src[c], w, h, dst[c]);
}
#endif

/* Index with reflect-101 borders, as the usual image filters do. */
static inline int refl(int i)
{
    if (i < 0)
        return -i;
    if (i >= N)
        return 2 * N - 2 - i;
    return i;
}

/* Copies m into pad with a reflect-101 border of 2: each row copied
 * whole, its two border cells on each side by hand. */
static void pad2(const float *m, float *pad)
{
    const int P = N + 4;
    for (int y = -2; y < N + 2; y++) {
        const float *row = m + refl(y) * N;
        float *d = pad + (size_t)(y + 2) * P;
        memcpy(d + 2, row, N * sizeof(float));
        d[0] = row[2];
        d[1] = row[1];
        d[N + 2] = row[N - 2];
        d[N + 3] = row[N - 3];
    }
}

/* Separable 5-tap Gaussian of the paper's sigma 8 — at 5 taps almost a box. */
static void blur5(float *m, float *pad)
{
    /* exp(-d^2 / 128) for d = 0, 1, 2, normalised */
    const float e1 = 0.99221794f, e2 = 0.96923323f, ks = 1.0f + 2 * e1 + 2 * e2;
    const float k0 = 1.0f / ks, k1 = e1 / ks, k2 = e2 / ks;
    const int P = N + 4;
    pad2(m, pad);
    for (int y = 0; y < N + 4; y++) { /* horizontal pass in place, rows of pad */
        float *r = pad + (size_t)y * P;
        float out[N];
        for (int x = 0; x < N; x++)
            out[x] = k2 * (r[x] + r[x + 4]) + k1 * (r[x + 1] + r[x + 3]) + k0 * r[x + 2];
        memcpy(r + 2, out, sizeof out);
    }
    for (int y = 0; y < N; y++) {
        const float *a = pad + (size_t)y * P + 2;
        for (int x = 0; x < N; x++)
            m[y * N + x] = k2 * (a[x] + a[x + 4 * P]) + k1 * (a[x + P] + a[x + 3 * P]) +
                           k0 * a[x + 2 * P];
    }
}

/* The spectrum of the periodic component of s->small into s->cx
 * (transposed: see below).  The DFT treats the image as a tile of a
 * periodic pattern; where its opposite
 * borders differ (sky above, sea below, a tilted horizon meeting the sides)
 * the seams add a cross of energy along the axes that the spectral residual
 * would show as salient stripes at the borders, taken for intrusions.  The
 * periodic-plus-smooth decomposition (Moisan, J. Math. Imaging Vis. 2011)
 * removes that: with v the border jumps (v = 0 inside), the smooth part
 * has spectrum S = V / (2 cos(2 pi q / N) + 2 cos(2 pi r / N) - 4), S(0,0) = 0,
 * and the periodic part is U - S.  U and V come from one complex transform
 * of small + i v (both are real, so Z(k) and conj Z(-k) separate them). */
static void periodic_spectrum(coach_saliency *s)
{
    const float *u = s->small;
    for (int i = 0; i < NN; i++) {
        s->cx[2 * i] = u[i];
        s->cx[2 * i + 1] = 0;
    }
    for (int x = 0; x < N; x++) {
        float d = u[(N - 1) * N + x] - u[x];
        s->cx[2 * x + 1] += d;
        s->cx[2 * ((N - 1) * N + x) + 1] -= d;
    }
    for (int y = 0; y < N; y++) {
        float d = u[y * N + N - 1] - u[y * N];
        s->cx[2 * (y * N) + 1] += d;
        s->cx[2 * (y * N + N - 1) + 1] -= d;
    }
    /* The spectrum comes out transposed (frequency (u, v) at v + N u) and
     * stays so until the inverse transform: two transposes fewer.  Every
     * step up to there is symmetric in u and v (the box mean below keeps
     * its order of additions). */
    coach_fft2d_fwd_t(&s->plan, &s->plan, s->cx, s->scratch);
    const float *z = s->scratch;
    float *out = s->cx;
    for (int q = 0; q < N; q++)
        for (int r = 0; r < N; r++) {
            int k = q * N + r;
            float U[2], V[2];
            coach_fft_split_pair(z, N, N, r, q, U, V);
            float ur = U[0], ui = U[1], vr = V[0], vi = V[1];
            float den = s->cos2[q] + s->cos2[r] - 4.0f;
            if (k == 0) {
                out[0] = ur;
                out[1] = ui;
            } else {
                out[2 * k] = ur - vr / den;
                out[2 * k + 1] = ui - vi / den;
            }
        }
}

/* The spectral residual map of s->small; 0 when the image is blank. */
static int spectral_residual(coach_saliency *s)
{
    double mean = 0, var = 0;
    for (int i = 0; i < NN; i++)
        mean += s->small[i];
    mean /= NN;
    for (int i = 0; i < NN; i++)
        var += (s->small[i] - mean) * (s->small[i] - mean);
    var /= NN;
    /* A frame without structure (blank, or flat to within a luma level)
     * has no salient region. */
    if (var < 1.0)
        return 0;
    periodic_spectrum(s);
    for (int i = 0; i < NN; i++) {
        float re = s->cx[2 * i], im = s->cx[2 * i + 1];
        s->la[i] = 0.5f * logf(re * re + im * im + 1e-12f);
    }
    pad2(s->la, s->pad);
    for (int y = 0; y < N; y++) {
        const float *a = s->pad + (size_t)(y + 1) * (N + 4) + 1;
        for (int x = 0; x < N; x++) {
            const float *q = a + x;
            /* column by column: the row-by-row order of the untransposed map */
            s->lb[y * N + x] = (q[0] + q[N + 4] + q[2 * N + 8] + q[1] + q[N + 5] + q[2 * N + 9] +
                                q[2] + q[N + 6] + q[2 * N + 10]) * (1.0f / 9.0f);
        }
    }
    /* the residual's amplitude, then the spectrum rescaled to it keeping
     * its phase: the second loop without calls or branches, four
     * frequencies at a time */
    for (int i = 0; i < NN; i++)
        s->lb[i] = expf(s->la[i] - s->lb[i]);
#ifdef __SSE2__
    for (int i = 0; i < NN; i += 4) { /* NN is a multiple of 4 */
        __m128 c0 = _mm_loadu_ps(s->cx + 2 * i), c1 = _mm_loadu_ps(s->cx + 2 * i + 4);
        __m128 re = _mm_shuffle_ps(c0, c1, _MM_SHUFFLE(2, 0, 2, 0));
        __m128 im = _mm_shuffle_ps(c0, c1, _MM_SHUFFLE(3, 1, 3, 1));
        __m128 g = _mm_loadu_ps(s->lb + i);
        __m128 mag = _mm_sqrt_ps(_mm_add_ps(_mm_mul_ps(re, re), _mm_mul_ps(im, im)));
        __m128 nz = _mm_cmpgt_ps(mag, _mm_setzero_ps());
        /* g * re / mag, g * im / mag; g and 0 where the magnitude is 0 */
        __m128 ore = _mm_or_ps(_mm_and_ps(nz, _mm_div_ps(_mm_mul_ps(g, re), mag)),
                               _mm_andnot_ps(nz, g));
        __m128 oim = _mm_and_ps(nz, _mm_div_ps(_mm_mul_ps(g, im), mag));
        _mm_storeu_ps(s->cx + 2 * i, _mm_unpacklo_ps(ore, oim));
        _mm_storeu_ps(s->cx + 2 * i + 4, _mm_unpackhi_ps(ore, oim));
    }
#else
    for (int i = 0; i < NN; i++) {
        float re = s->cx[2 * i], im = s->cx[2 * i + 1];
        float mag = sqrtf(re * re + im * im);
        float g = s->lb[i];
        if (mag > 0) {
            s->cx[2 * i] = g * re / mag;
            s->cx[2 * i + 1] = g * im / mag;
        } else {
            s->cx[2 * i] = g;
            s->cx[2 * i + 1] = 0;
        }
    }
#endif
    coach_fft2d_inv_t(&s->plan, &s->plan, s->cx, s->scratch);
    for (int i = 0; i < NN; i++) {
        float re = s->scratch[2 * i], im = s->scratch[2 * i + 1];
        s->map[i] = re * re + im * im;
    }
    blur5(s->map, s->pad);
    float mx = 0;
    for (int i = 0; i < NN; i++)
        if (s->map[i] > mx)
            mx = s->map[i];
    if (!(mx > 0))
        return 0;
    for (int i = 0; i < NN; i++)
        s->map[i] /= mx;
    return 1;
}

/* Boundary contrast, from the background prior (Wei, Wen, Zhu & Sun,
 * ECCV 2012: the borders of a photograph are mostly background): each
 * cell's colour distance to the nearest of the border's pieces (per-channel
 * medians of 4 segments per side, 2 cells deep).  A uniform object on a
 * quiet backdrop lights up as a whole here, where the spectral residual
 * marks mostly its outline and details.  Returns the largest distance. */
#define SEGS 4
static float boundary_contrast(coach_saliency *s)
{
    const float *dst[3] = {s->cr, s->cg, s->cb};
    float proto[4 * SEGS][3];
    const int L = N / SEGS;
    for (int side = 0; side < 4; side++)
        for (int sg = 0; sg < SEGS; sg++)
            for (int c = 0; c < 3; c++) {
                float v[2 * N / SEGS];
                int n = 0;
                for (int d = 0; d < 2; d++)
                    for (int i = sg * L; i < (sg + 1) * L; i++) {
                        int x = side == 0 ? d : side == 1 ? N - 1 - d : i;
                        int y = side == 2 ? d : side == 3 ? N - 1 - d : i;
                        float q = dst[c][y * N + x];
                        int k = n++;
                        while (k > 0 && v[k - 1] > q) {
                            v[k] = v[k - 1];
                            k--;
                        }
                        v[k] = q;
                    }
                proto[side * SEGS + sg][c] = 0.5f * (v[n / 2 - 1] + v[n / 2]);
            }
    /* each cell against all the pieces while its colour is in registers */
    float *best = s->bmap;
    for (int i = 0; i < NN; i++) {
        float b = 1e30f;
        for (int p = 0; p < 4 * SEGS; p++) {
            float dr = s->cr[i] - proto[p][0], dg = s->cg[i] - proto[p][1],
                  db = s->cb[i] - proto[p][2];
            float d2 = dr * dr + dg * dg + db * db;
            b = d2 < b ? d2 : b;
        }
        best[i] = b;
    }
    float mx = 0;
#ifdef __SSE2__
    /* the largest of values >= 0 does not depend on the order */
    __m128 m4 = _mm_setzero_ps();
    for (int i = 0; i < NN; i += 4) {
        __m128 v = _mm_sqrt_ps(_mm_loadu_ps(best + i));
        _mm_storeu_ps(best + i, v);
        m4 = _mm_max_ps(m4, v);
    }
    float m[4];
    _mm_storeu_ps(m, m4);
    for (int j = 0; j < 4; j++)
        mx = m[j] > mx ? m[j] : mx;
#else
    for (int i = 0; i < NN; i++) {
        best[i] = sqrtf(best[i]);
        mx = best[i] > mx ? best[i] : mx;
    }
#endif
    return mx;
}

/* The subject: the 8-connected regions of the object map, grouped when
 * their boxes lie within MERGE_GAP cells of each other (the spectral
 * residual outlines a larger object, and its outline can break into
 * pieces); the group holding the most saliency wins. */
static int root(region *r, int i)
{
    while (r[i].parent != i)
        i = r[i].parent = r[r[i].parent].parent;
    return i;
}

static void find_subject(coach_saliency *s, const float *map, float thr, const double *hline,
                         coach_salient *out)
{
    memset(s->label, 0, sizeof s->label);
    region *rg = s->regions;
    int nlab = 0;
    double total = 0;
    for (int i = 0; i < NN; i++) {
        if (map[i] <= thr || s->label[i])
            continue;
        region r = {0, 0, 0, N, N, -1, -1, 0, 0};
        int sp = 0;
        nlab++;
        s->stack[sp++] = (int16_t)i;
        s->label[i] = (int16_t)nlab;
        while (sp) {
            int p = s->stack[--sp], px = p % N, py = p / N;
            double v = map[p] - thr;
            r.mass += v;
            r.sx += v * (px + 0.5);
            r.sy += v * (py + 0.5);
            if (px < r.x0) r.x0 = px;
            if (px > r.x1) r.x1 = px;
            if (py < r.y0) r.y0 = py;
            if (py > r.y1) r.y1 = py;
            if (px == 0) r.sides |= COACH_EDGE_LEFT;
            if (px == N - 1) r.sides |= COACH_EDGE_RIGHT;
            if (py == 0) r.sides |= COACH_EDGE_TOP;
            if (py == N - 1) r.sides |= COACH_EDGE_BOTTOM;
            for (int dy = -1; dy <= 1; dy++)
                for (int dx = -1; dx <= 1; dx++) {
                    int qx = px + dx, qy = py + dy;
                    if (qx < 0 || qy < 0 || qx >= N || qy >= N)
                        continue;
                    int q = qy * N + qx;
                    if (map[q] > thr && !s->label[q]) {
                        s->label[q] = (int16_t)nlab;
                        s->stack[sp++] = (int16_t)q;
                    }
                }
        }
        total += r.mass;
        /* Keep the MAX_CAND heaviest regions, heaviest first. */
        int n = nlab - 1 < MAX_CAND ? nlab - 1 : MAX_CAND;
        if (n == MAX_CAND && r.mass <= rg[MAX_CAND - 1].mass)
            continue;
        int k = n < MAX_CAND ? n : MAX_CAND - 1;
        while (k > 0 && rg[k - 1].mass < r.mass) {
            rg[k] = rg[k - 1];
            k--;
        }
        rg[k] = r;
    }
    int nr = nlab < MAX_CAND ? nlab : MAX_CAND;
    if (hline) {
        /* The horizon is the level's business: the spectral residual marks
         * a straight edge most where the frame cuts it, so pieces lying on
         * the horizon line and reaching a side (or spanning the frame) are
         * neither subject nor intrusion. */
        int k = 0;
        for (int i = 0; i < nr; i++) {
            double cxr = rg[i].sx / rg[i].mass - 0.5, cyr = rg[i].sy / rg[i].mass - 0.5;
            int on_line = fabs(cyr - (hline[0] + hline[1] * cxr)) <= 4.0;
            int at_side = (rg[i].sides & (COACH_EDGE_LEFT | COACH_EDGE_RIGHT)) ||
                          rg[i].x1 - rg[i].x0 + 1 >= SPAN_CELLS;
            if (on_line && at_side)
                continue; /* still counted in total: salient, but not a subject */
            rg[k++] = rg[i];
        }
        nr = k;
    }
    if (nr == 0 || !(total > 0))
        return;
    /* Intrusions: regions that reach a border and carry at least a tenth
     * of the salient mass.  A region stretching across most of the frame
     * (a shoreline; its ends may break off) is structure, not something
     * cut off by the edge: its sides along that span do not count. */
    for (int i = 0; i < nr; i++) {
        if (rg[i].mass < 0.1 * total)
            continue;
        unsigned sd = rg[i].sides;
        if (rg[i].x1 - rg[i].x0 + 1 >= SPAN_CELLS)
            sd &= ~(unsigned)(COACH_EDGE_LEFT | COACH_EDGE_RIGHT);
        if (rg[i].y1 - rg[i].y0 + 1 >= SPAN_CELLS)
            sd &= ~(unsigned)(COACH_EDGE_TOP | COACH_EDGE_BOTTOM);
        out->edges |= sd;
    }
    /* Single-link grouping of regions with at least 2 % of the mass. */
    for (int i = 0; i < nr; i++)
        rg[i].parent = i;
    for (int i = 0; i < nr; i++) {
        if (rg[i].mass < 0.02 * total)
            break;
        for (int j = i + 1; j < nr; j++) {
            if (rg[j].mass < 0.02 * total)
                break;
            int gx = rg[i].x0 > rg[j].x1 ? rg[i].x0 - rg[j].x1 : rg[j].x0 - rg[i].x1;
            int gy = rg[i].y0 > rg[j].y1 ? rg[i].y0 - rg[j].y1 : rg[j].y0 - rg[i].y1;
            if (gx <= MERGE_GAP && gy <= MERGE_GAP) {
                int a = root(rg, i), b = root(rg, j);
                if (a != b)
                    rg[b].parent = a;
            }
        }
    }
    int best = -1;
    double best_mass = 0;
    for (int i = 0; i < nr; i++) {
        if (root(rg, i) != i)
            continue;
        double m = 0;
        for (int j = i; j < nr; j++)
            if (root(rg, j) == i)
                m += rg[j].mass;
        if (m > best_mass) {
            best_mass = m;
            best = i;
        }
    }
    /* A subject holds at least a third of the salient mass; when the mass
     * is spread over many small regions (texture, noise) there is none. */
    if (best < 0 || best_mass < total / 3.0)
        return;
    double sx = 0, sy = 0;
    int x0 = N, y0 = N, x1 = -1, y1 = -1;
    for (int j = best; j < nr; j++) {
        if (root(rg, j) != best)
            continue;
        sx += rg[j].sx;
        sy += rg[j].sy;
        if (rg[j].x0 < x0) x0 = rg[j].x0;
        if (rg[j].y0 < y0) y0 = rg[j].y0;
        if (rg[j].x1 > x1) x1 = rg[j].x1;
        if (rg[j].y1 > y1) y1 = rg[j].y1;
    }
    out->has_subject = 1;
    out->subject.x = sx / best_mass / N;
    out->subject.y = sy / best_mass / N;
    out->subject.w = (double)(x1 - x0 + 1) / N;
    out->subject.h = (double)(y1 - y0 + 1) / N;
}

const float *coach_saliency_run(coach_saliency *s, const float *luma, const float *r,
                                const float *g, const float *b, int w, int h,
                                const double *hline, coach_salient *out)
{
    memset(out, 0, sizeof *out);
    if (!s || w < 1 || h < 1 || w > s->max_w || h > s->max_h)
        return NULL;
    /* All four planes in one pass; without colour the luma stands in (its
     * copies are not used). */
    const int colour = r && g && b;
    const float *const src[4] = {luma, colour ? r : luma, colour ? g : luma, colour ? b : luma};
    float *const dst[4] = {s->small, s->cr, s->cg, s->cb};
    resample4(s, src, w, h, dst);
    if (!spectral_residual(s)) {
        memset(s->map, 0, sizeof s->map);
        return s->map;
    }
    double mean = 0;
    for (int i = 0; i < NN; i++)
        mean += s->map[i];
    mean /= NN;
    /* Balance as a lever: saliency above the mean, weighted by its signed
     * distance from the centre (-1 at the left/top edge, +1 at the other). */
    double m = 0, mx = 0, my = 0;
    for (int y = 0; y < N; y++)
        for (int x = 0; x < N; x++) {
            double v = s->map[y * N + x] - mean;
            if (v <= 0)
                continue;
            m += v;
            mx += v * ((x + 0.5) * 2.0 / N - 1.0);
            my += v * ((y + 0.5) * 2.0 / N - 1.0);
        }
    if (m > 0) {
        out->balance_lr = mx / m;
        out->balance_tb = my / m;
    }
    find_subject(s, s->map, (float)(3.0 * mean), hline, out);
    /* A subject that differs in colour from every part of the border is
     * located on the boundary-contrast map instead, which covers its whole
     * body; the spectral residual's outline pulls the centre toward the
     * most detailed part.  It has to be one clear region there. */
    if (colour && boundary_contrast(s) >= MIN_BOUNDARY_CONTRAST) {
        coach_salient bs;
        memset(&bs, 0, sizeof bs);
        float bmx = 0;
        for (int i = 0; i < NN; i++)
            bmx = s->bmap[i] > bmx ? s->bmap[i] : bmx;
        find_subject(s, s->bmap, 0.4f * bmx, NULL, &bs);
        if (bs.has_subject && bs.subject.w < 0.8 && bs.subject.h < 0.8) {
            out->has_subject = 1;
            out->subject = bs.subject;
        }
    }
    return s->map;
}
