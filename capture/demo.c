/* Demo scenes: procedural frames with known ground truth.
 *
 * Two invented scenes:
 *   harbour at dusk  - sky gradient over a textured sea, the horizon rocking
 *                      a few degrees as if hand-held, a small sailing boat
 *                      drifting across, the light brightening and dimming,
 *                      focus breathing in and out;
 *   studio tabletop  - a glazed jug on a seamless paper backdrop under a key
 *                      light, standing on a table whose front edge crosses
 *                      the frame; the framing drifts slowly and the lamp is
 *                      dimmed up and down.
 *
 * Every frame is a pure function of (seed, size, scene time), so tests and
 * headless runs are repeatable.  The truth a frame reports is what was
 * actually rendered: exposure is a factor 2^ev applied to linear light before
 * sRGB encoding, and blur is a Gaussian of the stated sigma applied to every
 * layer (analytically for straight edges, by convolution for texture and
 * sprites).
 *
 * Speed: the harbour is drawn from lookup tables rebuilt once per frame
 * (sky by height, sea by height x texture value, a finely sampled band for
 * the blurred horizon), so each pixel is a few additions and one or two
 * table reads; the wave texture is a small tile blurred per frame; the boat
 * is drawn only inside its box.  The tabletop is rendered once at open onto
 * a canvas larger than the frame and each frame is a shifted copy through an
 * exposure table.  Nothing is allocated per frame.
 */
#include <errno.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "capture/capture_internal.h"

#ifndef M_PI
#define M_PI 3.14159265358979323846
#endif

#define MIN_W 640
#define MIN_H 480
#define MAX_W 3840
#define MAX_H 2160
#define DEF_W 1280
#define DEF_H 720

#define ENC_N 16384   /* linear-light steps of the sRGB encoding table       */
#define TW 1024       /* wave texture tile, texels along the horizon (2^n)   */
#define TH 128        /* ... and across it (2^n)                              */
#define NT 64         /* quantised texture levels in the sea tables          */
#define QN 4096       /* steps of the texture quantiser's lookup table       */
#define KMAX 64       /* largest Gaussian radius (sigma up to ~21 px)        */
#define SIGMA_MAX 20.0

enum { SCENE_HARBOUR = 0, SCENE_TABLETOP };

typedef struct rgb { float r, g, b; } rgb;

typedef struct demo_source {
    cap_source base;
    int scene;
    int w, h;
    uint64_t seed;
    double ph[12];          /* phases of the slow drifts, from the seed */
    cap_demo_pin pin;
    uint64_t seq;

    float dec[256];         /* sRGB code -> linear, IEC 61966-2-1 */
    uint8_t enc[ENC_N];     /* linear -> sRGB code */

    /* harbour */
    float *tex;             /* TW x TH wave tile, -1..1 */
    float *texb, *tmp;      /* blurred tile, scratch (max(TW*TH, mask area)) */
    uint16_t *texk;         /* blurred tile in quantiser steps 0..QN-1 */
    double tex_lo;          /* deepest trough of the tile (the peak is +1) */
    uint8_t quant[QN];      /* texture value -1..1 -> level 0..NT-1 */
    uint32_t *sky, *sea, *band;
    int nrows;              /* rows of the sky and sea tables */
    int band_cap;           /* rows the band table can hold */
    float *mask;            /* boat masks: 3 planes */
    size_t mask_cap;        /* floats per plane */

    /* tabletop */
    uint32_t *canvas;       /* sRGB XRGB8888 at exposure 0 */
    int cw, ch, mx, my;     /* canvas size, margins */
    double canvas_tilt, canvas_sigma;
    double jug_box[4];      /* x0, y0, x1, y1 on the canvas, pixels */
    double edge_y0;         /* table edge: canvas y at canvas x = cw/2 */
    uint32_t lr[256], lg[256], lb[256];
} demo_source;

/* ---- small helpers ------------------------------------------------------ */

static uint64_t splitmix(uint64_t *s)
{
    uint64_t z = (*s += 0x9E3779B97F4A7C15ULL);
    z = (z ^ (z >> 30)) * 0xBF58476D1CE4E5B9ULL;
    z = (z ^ (z >> 27)) * 0x94D049BB133111EBULL;
    return z ^ (z >> 31);
}

static double rnd01(uint64_t *s)
{
    return (double)(splitmix(s) >> 11) * (1.0 / 9007199254740992.0);
}

static double clampd(double v, double lo, double hi)
{
    return v < lo ? lo : v > hi ? hi : v;
}

/* sRGB transfer functions, IEC 61966-2-1:1999 section 5.2 / 5.3. */
static double srgb_to_linear(double c)
{
    return c <= 0.04045 ? c / 12.92 : pow((c + 0.055) / 1.055, 2.4);
}

static double linear_to_srgb(double l)
{
    return l <= 0.0031308 ? 12.92 * l : 1.055 * pow(l, 1.0 / 2.4) - 0.055;
}

static void build_transfer(demo_source *d)
{
    for (int i = 0; i < 256; i++)
        d->dec[i] = (float)srgb_to_linear(i / 255.0);
    for (int i = 0; i < ENC_N; i++) {
        double v = linear_to_srgb((double)i / (ENC_N - 1)) * 255.0 + 0.5;
        d->enc[i] = (uint8_t)clampd(v, 0, 255);
    }
}

static inline uint8_t enc1(const demo_source *d, float l)
{
    int i = (int)(l * (ENC_N - 1) + 0.5f);
    return d->enc[i < 0 ? 0 : i >= ENC_N ? ENC_N - 1 : i];
}

static inline uint32_t pack(const demo_source *d, rgb c)
{
    return (uint32_t)enc1(d, c.r) << 16 | (uint32_t)enc1(d, c.g) << 8 | enc1(d, c.b);
}

static rgb mix(rgb a, rgb b, double t)
{
    float f = (float)t;
    return (rgb){a.r + (b.r - a.r) * f, a.g + (b.g - a.g) * f, a.b + (b.b - a.b) * f};
}

static rgb scale(rgb a, double k)
{
    float f = (float)k;
    return (rgb){a.r * f, a.g * f, a.b * f};
}

/* Standard normal CDF: the profile of a unit step blurred by a Gaussian. */
static double phi(double z)
{
    return 0.5 * erfc(-z / sqrt(2.0));
}

/* Sampled Gaussian, normalised; k[0..r]. */
static int gauss_kernel(double sigma, float *k)
{
    int r = (int)ceil(3.0 * sigma);
    if (r > KMAX)
        r = KMAX;
    double sum = 0;
    for (int i = 0; i <= r; i++) {
        k[i] = (float)exp(-0.5 * i * i / (sigma * sigma));
        sum += i ? 2.0 * k[i] : k[i];
    }
    for (int i = 0; i <= r; i++)
        k[i] = (float)(k[i] / sum);
    return r;
}

enum { EDGE_WRAP, EDGE_ZERO, EDGE_CLAMP };

static inline int edge_index(int i, int n, int mode)
{
    if (i >= 0 && i < n)
        return i;
    if (mode == EDGE_WRAP)
        return ((i % n) + n) % n;
    if (mode == EDGE_CLAMP)
        return i < 0 ? 0 : n - 1;
    return -1;
}

/* Separable Gaussian of a float plane (sx along rows, sy down columns);
 * src and dst may be the same; tmp holds w*h floats. */
static void blur_plane(const float *src, float *dst, float *tmp, int w, int h, double sx, double sy,
                       int mode)
{
    float k[KMAX + 1];
    if (sx >= 0.2) {
        int r = gauss_kernel(sx, k);
        for (int y = 0; y < h; y++) {
            const float *s = src + (size_t)y * (size_t)w;
            float *o = tmp + (size_t)y * (size_t)w;
            for (int x = 0; x < w; x++) {
                float acc = k[0] * s[x];
                if (x >= r && x < w - r) {
                    for (int i = 1; i <= r; i++)
                        acc += k[i] * (s[x - i] + s[x + i]);
                } else {
                    for (int i = 1; i <= r; i++) {
                        int a = edge_index(x - i, w, mode), b = edge_index(x + i, w, mode);
                        acc += k[i] * ((a >= 0 ? s[a] : 0.f) + (b >= 0 ? s[b] : 0.f));
                    }
                }
                o[x] = acc;
            }
        }
    } else {
        memcpy(tmp, src, sizeof(float) * (size_t)w * (size_t)h);
    }
    if (sy >= 0.2) {
        int r = gauss_kernel(sy, k);
        for (int y = 0; y < h; y++) {
            float *o = dst + (size_t)y * (size_t)w;
            const float *c = tmp + (size_t)y * (size_t)w;
            for (int x = 0; x < w; x++)
                o[x] = k[0] * c[x];
            for (int i = 1; i <= r; i++) {
                int a = edge_index(y - i, h, mode), b = edge_index(y + i, h, mode);
                const float *ra = a >= 0 ? tmp + (size_t)a * (size_t)w : NULL;
                const float *rb = b >= 0 ? tmp + (size_t)b * (size_t)w : NULL;
                float ki = k[i];
                if (ra && rb)
                    for (int x = 0; x < w; x++)
                        o[x] += ki * (ra[x] + rb[x]);
                else if (ra || rb) {
                    const float *rr = ra ? ra : rb;
                    for (int x = 0; x < w; x++)
                        o[x] += ki * rr[x];
                }
            }
        }
    } else if (dst != tmp) {
        memcpy(dst, tmp, sizeof(float) * (size_t)w * (size_t)h);
    }
}

/* o[0..n) += k * a[0..n), four lanes at a time (GCC/Clang vector
 * extension: plain SSE on x86-64, NEON on arm64). */
typedef float v4f __attribute__((vector_size(16)));
static void axpy(float *restrict o, const float *restrict a, float k, int n)
{
    int x = 0;
    v4f kv = {k, k, k, k};
    for (; x + 4 <= n; x += 4) {
        v4f va, vo;
        memcpy(&va, a + x, sizeof va);
        memcpy(&vo, o + x, sizeof vo);
        vo += kv * va;
        memcpy(o + x, &vo, sizeof vo);
    }
    for (; x < n; x++)
        o[x] += k * a[x];
}

/* Gaussian blur of a plane that is zero outside (sprite masks): every tap
 * is a shifted row or a neighbouring row added with its weight. */
static void blur_zero(float *buf, float *tmp, int w, int h, double sigma)
{
    float k[KMAX + 1];
    if (sigma < 0.2)
        return;
    int r = gauss_kernel(sigma, k);
    memset(tmp, 0, sizeof(float) * (size_t)w * (size_t)h);
    for (int y = 0; y < h; y++) {
        const float *s = buf + (size_t)y * (size_t)w;
        float *o = tmp + (size_t)y * (size_t)w;
        for (int i = -r; i <= r; i++) {
            /* o[x] += k * s[x + i] over the x where x + i is inside */
            int x0 = i < 0 ? -i : 0, x1 = i > 0 ? w - i : w;
            if (x1 > x0)
                axpy(o + x0, s + x0 + i, k[i < 0 ? -i : i], x1 - x0);
        }
    }
    memset(buf, 0, sizeof(float) * (size_t)w * (size_t)h);
    for (int y = 0; y < h; y++) {
        float *o = buf + (size_t)y * (size_t)w;
        for (int i = -r; i <= r; i++) {
            int yy = y + i;
            if (yy >= 0 && yy < h)
                axpy(o, tmp + (size_t)yy * (size_t)w, k[i < 0 ? -i : i], w);
        }
    }
}

/* The wave tile's horizontal pass: each row wrapped into a padded copy,
 * then one vectorised multiply-add per tap. */
static void tile_blur_rows(const float *src, float *dst, double sigma)
{
    float k[KMAX + 1], ext[TW + 2 * KMAX];
    if (sigma < 0.2) {
        memcpy(dst, src, sizeof(float) * TW * TH);
        return;
    }
    int r = gauss_kernel(sigma, k);
    for (int y = 0; y < TH; y++) {
        const float *s = src + (size_t)y * TW;
        float *o = dst + (size_t)y * TW;
        memcpy(ext + KMAX, s, sizeof(float) * TW);
        memcpy(ext + KMAX - r, s + TW - r, sizeof(float) * (size_t)r);
        memcpy(ext + KMAX + TW, s, sizeof(float) * (size_t)r);
        memset(o, 0, sizeof(float) * TW);
        for (int i = -r; i <= r; i++)
            axpy(o, ext + KMAX + i, k[i < 0 ? -i : i], TW);
    }
}

/* The wave tile's vertical pass, by far the widest: fixed width and
 * restrict-qualified rows let the compiler vectorise it at -O2. */
static void tile_blur_cols(const float *restrict src, float *restrict dst, double sigma)
{
    float k[KMAX + 1];
    if (sigma < 0.2) {
        memcpy(dst, src, sizeof(float) * TW * TH);
        return;
    }
    int r = gauss_kernel(sigma, k);
    if (r > TH / 2 - 1)
        r = TH / 2 - 1;
    for (int y = 0; y < TH; y++) {
        float *restrict o = dst + (size_t)y * TW;
        const float *restrict c = src + (size_t)y * TW;
        float k0 = k[0];
        for (int x = 0; x < TW; x++)
            o[x] = k0 * c[x];
        for (int i = 1; i <= r; i++) {
            const float *restrict a = src + (size_t)((y - i) & (TH - 1)) * TW;
            const float *restrict b = src + (size_t)((y + i) & (TH - 1)) * TW;
            float ki = k[i];
            for (int x = 0; x < TW; x++)
                o[x] += ki * (a[x] + b[x]);
        }
    }
}

/* ---- scene parameters over time --------------------------------------- */

typedef struct harbour_state {
    double tilt_deg, hy, ev, sigma;
    double boat_x, boat_dir, boat_bob;
} harbour_state;

static double wave(double t, double period, double phase)
{
    return sin(2.0 * M_PI * t / period + phase);
}

static harbour_state harbour_at(const demo_source *d, double t)
{
    harbour_state s;
    /* Hand-held roll: a few incommensurate slow swings, under 4 degrees. */
    s.tilt_deg = 2.1 * wave(t, 9.7, d->ph[0]) + 1.0 * wave(t, 4.3, d->ph[1]) +
                 0.35 * wave(t, 1.9, d->ph[2]);
    s.hy = 0.40 + 0.065 * wave(t, 13.1, d->ph[3]);
    /* Passing clouds dim and brighten the light by under a stop. */
    s.ev = 0.55 * wave(t, 17.0, d->ph[4]) + 0.25 * wave(t, 6.1, d->ph[5]);
    /* Focus breathing: mostly sharp, softening now and then. */
    double f = 0.5 - 0.5 * cos(2.0 * M_PI * t / 8.3 + d->ph[6]);
    s.sigma = 3.5 * (d->h / 1080.0) * f * f * f;
    double c = cos(2.0 * M_PI * t / 70.0 + d->ph[7]);
    s.boat_x = 0.5 - 0.36 * c;
    s.boat_dir = sin(2.0 * M_PI * t / 70.0 + d->ph[7]) >= 0 ? 1.0 : -1.0;
    s.boat_bob = wave(t, 2.3, d->ph[8]);
    if (!isnan(d->pin.horizon_deg))
        s.tilt_deg = d->pin.horizon_deg;
    if (!isnan(d->pin.exposure_ev))
        s.ev = d->pin.exposure_ev;
    if (!isnan(d->pin.blur_sigma))
        s.sigma = d->pin.blur_sigma;
    return s;
}

/* ---- harbour: static layers -------------------------------------------- */

/* Wave texture: crest-shaped ridges along the horizon from a sum of
 * sinusoids with whole cycles per tile, so the tile wraps seamlessly. */
static void add_wave(float *field, float *row_s, float *col_s, int kx, int ky, double amp, double p)
{
    for (int x = 0; x < TW; x++) {
        double a = 2 * M_PI * kx * x / TW + p;
        row_s[2 * x] = (float)sin(a);
        row_s[2 * x + 1] = (float)cos(a);
    }
    for (int y = 0; y < TH; y++) {
        double b = 2 * M_PI * ky * y / TH;
        col_s[2 * y] = (float)sin(b);
        col_s[2 * y + 1] = (float)cos(b);
    }
    for (int y = 0; y < TH; y++) {
        float sb = col_s[2 * y], cb = col_s[2 * y + 1];
        float *o = field + (size_t)y * TW;
        for (int x = 0; x < TW; x++) /* sin(a + b) */
            o[x] += (float)amp * (row_s[2 * x] * cb + row_s[2 * x + 1] * sb);
    }
}

static void unit_rms(float *f, size_t n)
{
    double ss = 0;
    for (size_t i = 0; i < n; i++)
        ss += (double)f[i] * f[i];
    float k = ss > 0 ? (float)(1.0 / sqrt(ss / (double)n)) : 1.0f;
    for (size_t i = 0; i < n; i++)
        f[i] *= k;
}

/* Wave texture from sums of sinusoids with whole cycles per tile (so the
 * tile wraps seamlessly): a long swell, fine ripples on it, and sparse
 * glints where ripple crests ride on swell crests and mirror the bright
 * sky.  Scaled so the brightest glint is +1; d->tex_lo is the deepest
 * trough. */
static int harbour_texture(demo_source *d)
{
    enum { NC = 36, NF = 16 };
    const size_t n = (size_t)TW * TH;
    uint64_t st = d->seed ^ 0xC0FFEE1234ULL;
    /* Ripples as fine as the frame shows without aliasing: a wavelength of
     * at least 3 pixels, i.e. 3 / (texel height) texels. */
    double sv = d->h / 720.0;
    int ky_max = (int)(TH * sv / 3.0);
    if (ky_max > TH / 2)
        ky_max = TH / 2;
    float *row_s = malloc(sizeof(float) * TW * 2), *col_s = malloc(sizeof(float) * TH * 2);
    float *fine = malloc(sizeof(float) * n);
    if (!row_s || !col_s || !fine) {
        free(row_s);
        free(col_s);
        free(fine);
        return -ENOMEM;
    }
    memset(d->tex, 0, sizeof(float) * n);
    memset(fine, 0, sizeof(float) * n);
    for (int c = 0; c < NC; c++) { /* swell: 6..43 texel wavelengths across, long along */
        int ky = 3 + (int)(rnd01(&st) * 20);
        int kx = (int)((rnd01(&st) - 0.5) * 2 * 40);
        add_wave(d->tex, row_s, col_s, kx, ky, 1.0 / (1.0 + 0.08 * ky), 2 * M_PI * rnd01(&st));
    }
    for (int c = 0; c < NF; c++) {
        int ky = (int)(ky_max * (0.55 + 0.45 * rnd01(&st)));
        int kx = (int)((rnd01(&st) - 0.5) * 2 * 60);
        add_wave(fine, row_s, col_s, kx, ky, 1.0, 2 * M_PI * rnd01(&st));
    }
    free(row_s);
    free(col_s);
    unit_rms(d->tex, n);
    unit_rms(fine, n);
    double mean = 0;
    for (size_t i = 0; i < n; i++) {
        double sw = d->tex[i], fr = fine[i];
        double g = fr + 0.6 * sw - 1.9;
        double v = 0.35 * sw + 0.25 * fr + (g > 0 ? 3.0 * g * g : 0);
        d->tex[i] = (float)v;
        mean += v;
    }
    free(fine);
    mean /= (double)n;
    double hi = 0, lo = 0;
    for (size_t i = 0; i < n; i++) {
        double v = d->tex[i] - mean;
        hi = v > hi ? v : hi;
        lo = v < lo ? v : lo;
    }
    for (size_t i = 0; i < n; i++)
        d->tex[i] = (float)((d->tex[i] - mean) / hi);
    d->tex_lo = lo / hi;
    /* Quantiser: square-root companding keeps fine steps where most of the
     * sea lives (near 0) and coarse ones for the rare bright glints. */
    for (int i = 0; i < QN; i++) {
        double v = 2.0 * i / (QN - 1) - 1.0;
        double u = v < 0 ? -sqrt(-v) : sqrt(v);
        int q = (int)lround((u + 1.0) * 0.5 * (NT - 1));
        d->quant[i] = (uint8_t)(q < 0 ? 0 : q > NT - 1 ? NT - 1 : q);
    }
    return 0;
}

/* Texture value a quantised level stands for (inverse of the companding). */
static double level_value(int q)
{
    double u = 2.0 * q / (NT - 1) - 1.0;
    return u < 0 ? -u * u : u * u;
}

/* Sky colour (linear, exposure 0) at altitude a above the horizon, in
 * frame heights. */
static rgb sky_colour(double a)
{
    static const struct { double a; rgb c; } k[] = {
        {0.00, {0.43f, 0.225f, 0.095f}}, {0.05, {0.36f, 0.20f, 0.12f}},
        {0.14, {0.20f, 0.12f, 0.145f}},  {0.32, {0.075f, 0.063f, 0.135f}},
        {0.62, {0.027f, 0.032f, 0.092f}}, {1.50, {0.015f, 0.02f, 0.06f}},
    };
    if (a <= 0)
        return k[0].c;
    for (size_t i = 1; i < sizeof k / sizeof k[0]; i++)
        if (a < k[i].a) {
            double t = (a - k[i - 1].a) / (k[i].a - k[i - 1].a);
            t = t * t * (3 - 2 * t);
            return mix(k[i - 1].c, k[i].c, t);
        }
    return k[sizeof k / sizeof k[0] - 1].c;
}

/* Sea colour at depth dn below the horizon (frame heights): the base tone
 * and what one unit of wave texture adds.  Linear in the texture, so
 * blurring the texture is blurring the sea.  lo is the texture's deepest
 * trough: the swing is sized so it leaves a fifth of the base there. */
static void sea_colour(double dn, double lo, rgb *base, rgb *var)
{
    static const rgb far = {0.135f, 0.088f, 0.078f}, near = {0.018f, 0.03f, 0.052f};
    static const rgb glint = {0.40f, 0.22f, 0.10f}; /* the warm sky, mirrored */
    double f = 1.0 - exp(-(dn > 0 ? dn : 0) / 0.15);
    *base = mix(far, near, f);
    double k = (0.8 / (lo < -0.05 ? -lo : 0.05)) * (0.25 + 0.75 * f);
    /* glints mirror the sky, but no more than the trough can pay for */
    double gk = 0.55 * (0.3 + 0.7 * f);
    rgb v = scale(*base, k);
    rgb g = scale(glint, gk);
    double room = -lo > 0.05 ? 0.8 / -lo : 16;
    *var = (rgb){fminf(v.r + g.r, (float)(base->r * room)), fminf(v.g + g.g, (float)(base->g * room)),
                 fminf(v.b + g.b, (float)(base->b * room))};
}

/* ---- harbour: per frame ------------------------------------------------- */

/* Builds the tables for exposure factor e and edge blur sigma_e: sky rows
 * every ds pixels up to nsky, sea rows every 2*ds pixels up to nsea. */
static int harbour_tables(demo_source *d, double e, double sigma_e, double ds, int nsky, int nsea)
{
    double H = d->h;
    for (int i = 0; i < nsky && i < d->nrows; i++)
        d->sky[i] = pack(d, scale(sky_colour(i * ds / H), e));
    for (int i = 0; i < nsea && i < d->nrows; i++) {
        rgb b, v;
        sea_colour(i * 2 * ds / H, d->tex_lo, &b, &v);
        uint32_t *row = d->sea + (size_t)i * NT;
        for (int q = 0; q < NT; q++) {
            double tx = level_value(q);
            rgb c = {b.r + (float)tx * v.r, b.g + (float)tx * v.g, b.b + (float)tx * v.b};
            row[q] = pack(d, scale(c, e));
        }
    }
    /* Within +-B of the horizon, quarter-pixel rows of the step between sky
     * and sea blurred by sigma_e (the normal CDF profile). */
    int B = (int)ceil(4.0 * sigma_e) + 2;
    int rows = 8 * B + 1;
    if (rows > d->band_cap)
        return -1;
    rgb sky0 = sky_colour(0);
    for (int j = 0; j < rows; j++) {
        double dd = j / 4.0 - B;
        double a = phi(dd / sigma_e);
        rgb s = dd < 0 ? sky_colour(-dd / H) : sky0;
        rgb b, v;
        sea_colour(dd > 0 ? dd / H : 0, d->tex_lo, &b, &v);
        uint32_t *row = d->band + (size_t)j * NT;
        for (int q = 0; q < NT; q++) {
            double tx = level_value(q);
            rgb c = {b.r + (float)tx * v.r, b.g + (float)tx * v.g, b.b + (float)tx * v.b};
            row[q] = pack(d, scale(mix(s, c, a), e));
        }
    }
    return B;
}

/* The boat, in its own frame: x along the horizon (bow at +x), y up from
 * the waterline, in hull lengths.  Convex parts; colour 0 the white hull
 * and the varnished mast, 1 the sails. */
typedef struct boat_part { int n; double v[4][2]; int colour; } boat_part;
static const boat_part boat_parts[] = {
    {4, {{-0.50, 0.16}, {0.56, 0.16}, {0.34, 0.0}, {-0.42, 0.0}}, 0},  /* hull */
    {4, {{-0.012, 0.16}, {0.012, 0.16}, {0.012, 1.42}, {-0.012, 1.42}}, 0}, /* mast */
    {3, {{-0.01, 0.27}, {-0.01, 1.36}, {-0.46, 0.27}}, 1},              /* mainsail */
    {3, {{0.03, 0.25}, {0.03, 1.25}, {0.50, 0.22}}, 1},                 /* jib */
};
#define NPARTS (sizeof boat_parts / sizeof boat_parts[0])

typedef struct boat_geom {
    double L, cx, hyp, c, s, ub, db, dir;
} boat_geom;

/* Boat-frame point to image pixel coordinates. */
static void boat_to_image(const boat_geom *g, double bx, double by, double *x, double *y)
{
    double u = g->ub + g->dir * bx * g->L;
    double dd = g->db - by * g->L;
    *x = g->cx + u * g->c + dd * g->s;
    *y = g->hyp - u * g->s + dd * g->c;
}

static void draw_boat(demo_source *d, uint8_t *dst, int stride, const harbour_state *hs,
                      double e, double sigma, double box[4])
{
    int w = d->w, h = d->h;
    double th = hs->tilt_deg * M_PI / 180.0;
    boat_geom g = {
        .L = 0.10 * h, .cx = w / 2.0, .hyp = hs->hy * h, .c = cos(th), .s = sin(th),
        .ub = (hs->boat_x - 0.5) * w, .db = (0.22 + 0.003 * hs->boat_bob) * h, .dir = hs->boat_dir,
    };
    double x0 = 1e9, y0 = 1e9, x1 = -1e9, y1 = -1e9;
    for (size_t p = 0; p < NPARTS; p++)
        for (int i = 0; i < boat_parts[p].n; i++) {
            double x, y;
            boat_to_image(&g, boat_parts[p].v[i][0], boat_parts[p].v[i][1], &x, &y);
            x0 = fmin(x0, x), y0 = fmin(y0, y), x1 = fmax(x1, x), y1 = fmax(y1, y);
        }
    box[0] = x0, box[1] = y0, box[2] = x1, box[3] = y1;
    int pad = (int)ceil(3.0 * sigma) + 2;
    int bx0 = (int)floor(x0) - pad, by0 = (int)floor(y0) - pad;
    int bx1 = (int)ceil(x1) + pad, by1 = (int)ceil(y1) + pad;
    if (bx0 < 0) bx0 = 0;
    if (by0 < 0) by0 = 0;
    if (bx1 > w) bx1 = w;
    if (by1 > h) by1 = h;
    int mw = bx1 - bx0, mh = by1 - by0;
    if (mw <= 0 || mh <= 0 || (size_t)mw * (size_t)mh > d->mask_cap)
        return;
    size_t plane = (size_t)mw * (size_t)mh;
    float *m[2] = {d->mask, d->mask + plane};
    memset(d->mask, 0, sizeof(float) * plane * 2);

    /* Each part's edges as lines a*x + b*y + c = signed distance in pixels,
     * positive outside, so coverage is 0.5 minus the largest distance. */
    for (size_t p = 0; p < NPARTS; p++) {
        const boat_part *bp = &boat_parts[p];
        double px[4], py[4], ea[4], eb[4], ec[4];
        double qx0 = 1e9, qy0 = 1e9, qx1 = -1e9, qy1 = -1e9;
        for (int i = 0; i < bp->n; i++) {
            boat_to_image(&g, bp->v[i][0], bp->v[i][1], &px[i], &py[i]);
            qx0 = fmin(qx0, px[i]), qy0 = fmin(qy0, py[i]);
            qx1 = fmax(qx1, px[i]), qy1 = fmax(qy1, py[i]);
        }
        double area = 0;
        for (int i = 0; i < bp->n; i++) {
            int j = (i + 1) % bp->n;
            area += px[i] * py[j] - px[j] * py[i];
        }
        double orient = area > 0 ? 1.0 : -1.0;
        for (int i = 0; i < bp->n; i++) {
            int j = (i + 1) % bp->n;
            double ex = px[j] - px[i], ey = py[j] - py[i], len = hypot(ex, ey);
            /* outward normal for this winding */
            ea[i] = ey / len * orient;
            eb[i] = -ex / len * orient;
            ec[i] = -(ea[i] * px[i] + eb[i] * py[i]);
        }
        int ix0 = (int)floor(qx0) - 1, iy0 = (int)floor(qy0) - 1;
        int ix1 = (int)ceil(qx1) + 1, iy1 = (int)ceil(qy1) + 1;
        if (ix0 < bx0) ix0 = bx0;
        if (iy0 < by0) iy0 = by0;
        if (ix1 > bx1) ix1 = bx1;
        if (iy1 > by1) iy1 = by1;
        float *mm = m[bp->colour];
        for (int y = iy0; y < iy1; y++) {
            double yc = y + 0.5;
            for (int x = ix0; x < ix1; x++) {
                double xc = x + 0.5, dmax = -1e9;
                for (int i = 0; i < bp->n; i++) {
                    double dist = ea[i] * xc + eb[i] * yc + ec[i];
                    if (dist > dmax)
                        dmax = dist;
                }
                double cov = clampd(0.5 - dmax, 0, 1);
                float *o = mm + (size_t)(y - by0) * (size_t)mw + (x - bx0);
                if (cov > *o)
                    *o = (float)cov;
            }
        }
    }
    for (int k = 0; k < 2; k++)
        blur_zero(m[k], d->tmp, mw, mh, sigma);

    static const rgb col[2] = {
        {0.26f, 0.235f, 0.20f},  /* hull and mast in the low warm light */
        {0.40f, 0.31f, 0.24f},   /* sails catching the dusk light */
    };
    rgb c0 = scale(col[0], e), c1 = scale(col[1], e);
    for (int y = 0; y < mh; y++) {
        uint32_t *row = (uint32_t *)(dst + (size_t)(y + by0) * (size_t)stride) + bx0;
        size_t o = (size_t)y * (size_t)mw;
        for (int x = 0; x < mw; x++) {
            float a0 = m[0][o + x], a1 = m[1][o + x];
            float at = a0 + a1;
            if (at < 1e-4f)
                continue;
            if (at > 1) {
                a0 /= at, a1 /= at;
                at = 1;
            }
            uint32_t p = row[x];
            rgb bg = {d->dec[(p >> 16) & 255], d->dec[(p >> 8) & 255], d->dec[p & 255]};
            rgb c = {
                bg.r * (1 - at) + a0 * c0.r + a1 * c1.r,
                bg.g * (1 - at) + a0 * c0.g + a1 * c1.g,
                bg.b * (1 - at) + a0 * c0.b + a1 * c1.b,
            };
            row[x] = pack(d, c);
        }
    }
}

/* Blurred texture level at fixed-point texel position (tu, tv): nearest
 * along the horizon, linear across it (so a tilted horizon shows no seams
 * where the sampled texel row steps), in quantiser steps: integers only. */
static inline int tex_level(const demo_source *d, uint32_t tu, uint32_t tv)
{
    uint32_t c = (tu >> 16) & (TW - 1), r0 = (tv >> 16) & (TH - 1), r1 = (r0 + 1) & (TH - 1);
    int32_t f = (int32_t)((tv >> 4) & 0xFFF); /* 12-bit fraction */
    int32_t k0 = d->texk[r0 * TW + c], k1 = d->texk[r1 * TW + c];
    return d->quant[k0 + (((k1 - k0) * f) >> 12)];
}

static void harbour_render(demo_source *d, double t, uint8_t *dst, int stride, cap_truth *tr)
{
    harbour_state hs = harbour_at(d, t);
    int w = d->w, h = d->h;
    /* The base light puts the frame about half a stop under middle grey, so
     * the drift crosses a well exposed band and, at its brightest, just
     * clips the glow over the horizon. */
    double e = 1.6 * exp2(hs.ev);
    double sigma = clampd(hs.sigma, 0, SIGMA_MAX);
    /* A pixel integrates over its area: a box of width 1 has variance 1/12,
     * so straight edges are drawn with that much extra blur (antialiasing). */
    double sigma_e = sqrt(sigma * sigma + 1.0 / 12.0);
    double ds = d->h > 1080 ? d->h / 1080.0 : 1.0; /* table row spacing, px */
    double su = 2.0 * d->h / 720.0, sv = d->h / 720.0; /* texel size, px */

    /* Waves: blur the tile by sigma in texel units. */
    tile_blur_rows(d->tex, d->tmp, sigma / su);
    tile_blur_cols(d->tmp, d->texb, sigma / sv);
    for (int i = 0; i < TW * TH; i++) {
        float k = (d->texb[i] + 1.0f) * (0.5f * (QN - 1)) + 0.5f;
        k = k < 0.0f ? 0.0f : k > (float)(QN - 1) ? (float)(QN - 1) : k;
        d->texk[i] = (uint16_t)(int)k;
    }
    double th = hs.tilt_deg * M_PI / 180.0;
    double s = sin(th), c = cos(th);
    double cx = w / 2.0, hyp = hs.hy * h;
    /* Only the heights this frame reaches need table rows: check the corners. */
    double dlo = 0, dhi = 0;
    for (int k = 0; k < 4; k++) {
        double xx = (k & 1 ? w : 0) - cx, yy = (k & 2 ? h : 0) - hyp;
        double dk = xx * s + yy * c;
        dlo = fmin(dlo, dk), dhi = fmax(dhi, dk);
    }
    int B = harbour_tables(d, e, sigma_e, ds, (int)(-dlo / ds) + 2, (int)(dhi / (2 * ds)) + 2);
    if (B < 0)
        B = 0;
    /* The waves drift along the shore and roll in toward the camera. */
    double tu_off = fmod(t * 5.0, TW) + TW * 16.0, tv_off = TH * 16.0 - fmod(t * 2.0, TH);
    /* Fixed point (16 fractional bits) along each row: one table per kind
     * of pixel, chosen by the row's crossing points, keeps the inner loops
     * free of branches and float conversions. */
    const double F = 65536.0;
    int maxrow = d->nrows - 1, maxband = 8 * B;
    for (int y = 0; y < h; y++) {
        /* Pixel centres: d is the signed distance below the horizon line,
         * u the position along it, both in pixels. */
        double yc = y + 0.5 - hyp, xc0 = 0.5 - cx;
        double d0 = xc0 * s + yc * c, u0 = xc0 * c - yc * s;
        uint32_t *row = (uint32_t *)(dst + (size_t)y * (size_t)stride);
        /* x where d crosses -B and +B */
        int xa, xb;
        if (fabs(s) < 1e-9) {
            xa = d0 <= -B ? w : 0;
            xb = d0 < B ? w : 0;
            if (d0 > -B && d0 < B)
                xa = 0;
        } else {
            double ta = (-B - d0) / s, tb = (B - d0) / s;
            if (s > 0) { /* sky, band, sea from left to right */
                xa = (int)clampd(floor(ta) + 1, 0, w);
                xb = (int)clampd(ceil(tb), 0, w);
            } else {     /* sea, band, sky */
                xa = (int)clampd(ceil(tb), 0, w);
                xb = (int)clampd(floor(ta) + 1, 0, w);
            }
            if (xb < xa)
                xb = xa;
        }
        int seg_lo[3], seg_hi[3], kind[3];
        if (s >= 0) {
            seg_lo[0] = 0, seg_hi[0] = xa, kind[0] = 0;
            seg_lo[1] = xa, seg_hi[1] = xb, kind[1] = 1;
            seg_lo[2] = xb, seg_hi[2] = w, kind[2] = 2;
        } else {
            seg_lo[0] = 0, seg_hi[0] = xa, kind[0] = 2;
            seg_lo[1] = xa, seg_hi[1] = xb, kind[1] = 1;
            seg_lo[2] = xb, seg_hi[2] = w, kind[2] = 0;
        }
        for (int g = 0; g < 3; g++) {
            int x0 = seg_lo[g], x1 = seg_hi[g];
            if (x1 <= x0)
                continue;
            double dx0 = d0 + x0 * (double)s, ux0 = u0 + x0 * (double)c;
            if (kind[g] == 0) {
                /* The sky depends on height only: fill each run of pixels
                 * that share a table row in one go. */
                int64_t k = (int64_t)(-dx0 / ds * F), dk = (int64_t)(-s / ds * F);
                for (int x = x0; x < x1;) {
                    int64_t i = k >> 16;
                    int64_t n = x1 - x;
                    if (dk > 0)
                        n = (((i + 1) << 16) - k + dk - 1) / dk;
                    else if (dk < 0)
                        n = (k - (i << 16)) / -dk + 1;
                    if (n > x1 - x)
                        n = x1 - x;
                    if (n < 1)
                        n = 1;
                    uint32_t v = d->sky[i < 0 ? 0 : i > maxrow ? maxrow : i];
                    for (int j = 0; j < (int)n; j++)
                        row[x + j] = v;
                    x += (int)n;
                    k += n * dk;
                }
                continue;
            }
            uint32_t tu = (uint32_t)(int64_t)llround((ux0 / su + tu_off) * F);
            uint32_t tv = (uint32_t)(int64_t)llround((dx0 / sv + tv_off) * F);
            uint32_t dtu = (uint32_t)(int32_t)lround(c / su * F);
            uint32_t dtv = (uint32_t)(int32_t)lround(s / sv * F);
            if (kind[g] == 1) {
                int32_t k = (int32_t)((dx0 + B) * 4.0 * F), dk = (int32_t)(s * 4.0 * F);
                for (int x = x0; x < x1; x++, k += dk, tu += dtu, tv += dtv) {
                    int i = k >> 16;
                    i = i < 0 ? 0 : i > maxband ? maxband : i;
                    int q = tex_level(d, tu, tv);
                    row[x] = d->band[i * NT + q];
                }
            } else {
                /* Pairs of pixels share a texture sample: a texel is 1.3 to
                 * 5 pixels long along the horizon, and this halves the work
                 * on the largest part of the frame. */
                int32_t k = (int32_t)(dx0 / (2 * ds) * F), dk = (int32_t)(s / (2 * ds) * F);
                int x = x0;
                for (; x + 1 < x1; x += 2, k += 2 * dk, tu += 2 * dtu, tv += 2 * dtv) {
                    int i = k >> 16;
                    i = i < 0 ? 0 : i > maxrow ? maxrow : i;
                    uint32_t v = d->sea[i * NT + tex_level(d, tu, tv)];
                    row[x] = v;
                    row[x + 1] = v;
                }
                if (x < x1) {
                    int i = k >> 16;
                    i = i < 0 ? 0 : i > maxrow ? maxrow : i;
                    row[x] = d->sea[i * NT + tex_level(d, tu, tv)];
                }
            }
        }
    }

    double box[4];
    draw_boat(d, dst, stride, &hs, e, sigma, box);

    memset(tr, 0, sizeof *tr);
    tr->valid = 1;
    tr->horizon_deg = hs.tilt_deg;
    tr->horizon_y = hs.hy;
    double x0 = clampd(box[0], 0, w), x1 = clampd(box[2], 0, w);
    double y0 = clampd(box[1], 0, h), y1 = clampd(box[3], 0, h);
    if (x1 > x0 && y1 > y0) {
        tr->subject_x = (x0 + x1) / 2 / w;
        tr->subject_y = (y0 + y1) / 2 / h;
        tr->subject_w = (x1 - x0) / w;
        tr->subject_h = (y1 - y0) / h;
    } else {
        tr->subject_x = tr->subject_y = tr->subject_w = tr->subject_h = NAN;
    }
    tr->exposure_ev = hs.ev;
    tr->blur_sigma = sigma;
}

static int harbour_alloc(demo_source *d)
{
    double diag = hypot(d->w, d->h);
    double ds = d->h > 1080 ? d->h / 1080.0 : 1.0;
    d->nrows = (int)(diag / ds) + 4;
    d->band_cap = 8 * ((int)ceil(4.0 * sqrt(SIGMA_MAX * SIGMA_MAX + 1.0 / 12)) + 2) + 1;
    /* boat box: about 0.11 x 0.16 frame heights, plus the blur margin */
    int side = (int)(0.20 * d->h) + 2 * ((int)ceil(3 * SIGMA_MAX) + 4);
    d->mask_cap = (size_t)side * (size_t)side;
    size_t tmpn = d->mask_cap > (size_t)TW * TH ? d->mask_cap : (size_t)TW * TH;
    d->tex = malloc(sizeof(float) * TW * TH);
    d->texb = malloc(sizeof(float) * TW * TH);
    d->texk = malloc(sizeof(uint16_t) * TW * TH);
    d->tmp = malloc(sizeof(float) * tmpn);
    d->sky = malloc(sizeof(uint32_t) * (size_t)d->nrows);
    d->sea = malloc(sizeof(uint32_t) * (size_t)d->nrows * NT);
    d->band = malloc(sizeof(uint32_t) * (size_t)d->band_cap * NT);
    d->mask = malloc(sizeof(float) * d->mask_cap * 2);
    if (!d->tex || !d->texb || !d->texk || !d->tmp || !d->sky || !d->sea || !d->band || !d->mask)
        return -ENOMEM;
    return harbour_texture(d);
}

/* ---- tabletop ------------------------------------------------------------ */

/* Jug profile: radius in units of the largest radius, at height s from the
 * foot (0) to the lip (1). */
static double jug_profile(double s, double *slope)
{
    static const double ks[] = {0.00, 0.06, 0.30, 0.55, 0.74, 0.86, 0.95, 1.00};
    static const double kr[] = {0.72, 0.86, 1.00, 0.92, 0.64, 0.50, 0.53, 0.60};
    enum { N = sizeof ks / sizeof ks[0] };
    s = clampd(s, 0, 1);
    int i = 1;
    while (i < N - 1 && s > ks[i])
        i++;
    /* cubic Hermite with centred-difference tangents: a smooth outline, so
     * the shading has no creases at the knots */
    double m[2];
    for (int k = 0; k < 2; k++) {
        int a = i - 1 + k;
        int lo = a > 0 ? a - 1 : a, hi = a < N - 1 ? a + 1 : a;
        m[k] = (kr[hi] - kr[lo]) / (ks[hi] - ks[lo]);
    }
    double hseg = ks[i] - ks[i - 1], t = (s - ks[i - 1]) / hseg;
    double t2 = t * t, t3 = t2 * t;
    double r = (2 * t3 - 3 * t2 + 1) * kr[i - 1] + (t3 - 2 * t2 + t) * hseg * m[0] +
               (-2 * t3 + 3 * t2) * kr[i] + (t3 - t2) * hseg * m[1];
    *slope = ((6 * t2 - 6 * t) * kr[i - 1] + (3 * t2 - 4 * t + 1) * hseg * m[0] +
              (-6 * t2 + 6 * t) * kr[i] + (3 * t2 - 2 * t) * hseg * m[1]) / hseg;
    return r;
}

typedef struct jug_geom {
    double xc, ybase, H, R;      /* centre column, foot line, height, max radius (px) */
    double hx, hy, hr, ht;       /* handle ring centre, radius, thickness */
} jug_geom;

/* Jug colour and coverage at world point (x, y) (y down); 0 coverage when
 * outside.  Linear light, exposure 0. */
static double jug_at(const jug_geom *j, double x, double y, rgb *out)
{
    static const rgb glaze = {0.07f, 0.21f, 0.19f};
    /* key light from the upper left, in front; viewer along +z */
    const double L[3] = {-0.55, -0.45, 0.70};
    double ln = sqrt(L[0] * L[0] + L[1] * L[1] + L[2] * L[2]);
    double Lx = L[0] / ln, Ly = L[1] / ln, Lz = L[2] / ln;
    double Hx = Lx, Hy = Ly, Hz = Lz + 1.0, hn = sqrt(Hx * Hx + Hy * Hy + Hz * Hz);
    Hx /= hn, Hy /= hn, Hz /= hn;

    double s = (j->ybase - y) / j->H;
    double cov_body = 0;
    if (s > -0.01 && s < 1.01) {
        double slope;
        double r = jug_profile(s, &slope) * j->R;
        /* a pouring lip on the left near the top */
        double lip = s > 0.86 ? (s - 0.86) / 0.14 : 0;
        double rl = r * (1.0 + 0.30 * lip * lip);
        double dx = x - j->xc;
        double rr = dx < 0 ? rl : r;
        double edge = rr - fabs(dx);
        double vert = fmin(s * j->H, (1.0 - s) * j->H);
        cov_body = clampd(0.5 + fmin(edge, vert), 0, 1);
        if (cov_body > 0) {
            double nx = clampd(dx / rr, -0.999, 0.999);
            double nz = sqrt(1 - nx * nx);
            /* profile slope tilts the normal up or down */
            double ny = slope * j->R / j->H * nz;
            double nn = sqrt(nx * nx + ny * ny + nz * nz);
            nx /= nn, ny /= nn, nz /= nn;
            double diff = fmax(0, nx * Lx + ny * Ly + nz * Lz);
            double spec = pow(fmax(0, nx * Hx + ny * Hy + nz * Hz), 60);
            /* the inside of the mouth shows dark just below the lip */
            double inner = s > 0.97 && fabs(dx) < r * 0.8 ? 0.35 : 1.0;
            double k = (0.12 + 0.95 * diff) * inner;
            *out = (rgb){(float)(glaze.r * k + 0.30 * spec), (float)(glaze.g * k + 0.30 * spec),
                         (float)(glaze.b * k + 0.28 * spec)};
            return cov_body;
        }
    }
    /* handle: a ring on the right, only where it is outside the body */
    double hdx = x - j->hx, hdy = y - j->hy;
    double dist = hypot(hdx, hdy);
    double ring = j->ht / 2 - fabs(dist - j->hr);
    if (hdx > 0 && ring > -1) {
        double cov = clampd(0.5 + ring, 0, 1);
        double ang = atan2(hdy, hdx);
        double k = 0.15 + 0.55 * fmax(0, -sin(ang)) + 0.1 * (1 - fabs(dist - j->hr) / j->ht);
        *out = (rgb){(float)(glaze.r * k), (float)(glaze.g * k), (float)(glaze.b * k)};
        return cov;
    }
    return 0;
}

/* Backdrop, table top and front edge at world point (x, y): linear light. */
static rgb table_at(const demo_source *d, const jug_geom *j, double x, double y, double edge_y)
{
    double W = d->w, Hh = d->h;
    static const rgb paper = {0.36f, 0.33f, 0.29f}, wood = {0.05f, 0.029f, 0.018f};
    double px = Hh > 1080 ? Hh / 1080.0 : 1.0; /* detail scale: pixels at 1080 lines */
    /* key light pool on the backdrop, falling off from the upper left */
    double kx = 0.32 * W, ky = 0.22 * Hh, R = 0.75 * Hh;
    double r2 = ((x - kx) * (x - kx) + (y - ky) * (y - ky)) / (R * R);
    double k = 0.30 + 0.85 * exp(-r2);
    /* the sweep darkens a little toward the top */
    k *= 0.8 + 0.2 * clampd(y / Hh, 0, 1);
    /* paper fibre: a faint per-fibre speckle */
    uint64_t hs = d->seed ^ ((uint64_t)(int64_t)floor(x / px) * 0x9E3779B1ull) ^
                  ((uint64_t)(int64_t)floor(y / px) * 0x85EBCA77ull << 20);
    k *= 1.0 + 0.015 * (2.0 * rnd01(&hs) - 1.0);
    rgb c = scale(paper, k);
    /* soft contact shadow of the jug, thrown right by the key light */
    double sx = (x - (j->xc + 0.35 * j->R)) / (1.5 * j->R);
    double sy = (y - j->ybase) / (0.13 * j->R);
    if (y > j->ybase - 0.3 * j->R)
        c = scale(c, 1.0 - 0.6 * exp(-(sx * sx + sy * sy)));
    /* front edge: a thin highlight where the rounded edge of the top turns
     * toward the light, then the dark front face below the edge line */
    double below = y - edge_y;
    double hz = (below + 1.2 * px) / (0.7 * px);
    double hl = exp(-0.5 * hz * hz);
    static const rgb edge_hl = {0.42f, 0.38f, 0.33f};
    double a = clampd(below + 0.5, 0, 1);
    double fade = clampd(below / (0.25 * Hh), 0, 1);
    /* wood grain along the edge: fine wavy lines */
    double grain = sin(2 * M_PI * (below / (3.3 * px) + 0.9 * sin(x / (61 * px)) +
                                   0.35 * sin(x / (17 * px)))) *
                   (0.55 + 0.45 * sin(x / (23 * px) + below / (9 * px)));
    c = mix(c, scale(wood, (1.0 - 0.5 * fade) * (1.0 + 0.3 * grain)), a);
    c = mix(c, edge_hl, 0.6 * hl);
    return c;
}

static int tabletop_render_canvas(demo_source *d, double tilt_deg, double sigma)
{
    int cw = d->cw, ch = d->ch;
    double th = tilt_deg * M_PI / 180.0, c = cos(th), s = sin(th);
    double ccx = cw / 2.0, ccy = ch / 2.0;
    double H = d->h;
    jug_geom j;
    uint64_t st = d->seed ^ 0x7AB1E70Full;
    j.H = 0.44 * H;
    j.R = 0.155 * H;
    j.xc = d->w * (0.46 + 0.04 * (rnd01(&st) - 0.5));
    j.ybase = 0.77 * H;
    j.hr = 0.21 * j.H;
    j.ht = 0.075 * j.R * 1.6;
    j.hx = j.xc + 0.62 * j.R;
    j.hy = j.ybase - 0.60 * j.H;
    double edge_y = 0.86 * H;
    float *lin = NULL, *tmp = NULL;
    if (sigma >= 0.2) {
        lin = malloc(sizeof(float) * (size_t)cw * (size_t)ch * 3);
        tmp = malloc(sizeof(float) * (size_t)cw * (size_t)ch);
        if (!lin || !tmp) {
            free(lin);
            free(tmp);
            return -ENOMEM;
        }
    }
    double bx0 = 1e9, by0 = 1e9, bx1 = -1e9, by1 = -1e9;
    /* the jug's extent in world coordinates, to skip it elsewhere */
    double jx0 = j.xc - 1.4 * j.R, jx1 = j.hx + j.hr + j.ht + 2;
    double jy0 = j.ybase - j.H - 2, jy1 = j.ybase + 2;
    for (int Y = 0; Y < ch; Y++) {
        for (int X = 0; X < cw; X++) {
            /* canvas pixel -> world: the camera is rolled by tilt about the
             * canvas centre; the world frame's origin is the frame's corner
             * with no pan. */
            double px = X + 0.5 - ccx, py = Y + 0.5 - ccy;
            double wx = px * c - py * s + d->w / 2.0;
            double wy = px * s + py * c + d->h / 2.0;
            rgb col = table_at(d, &j, wx, wy, edge_y);
            if (wx > jx0 && wx < jx1 && wy > jy0 && wy < jy1) {
                rgb jc;
                double cov = jug_at(&j, wx, wy, &jc);
                if (cov > 0) {
                    col = mix(col, jc, cov);
                    if (cov >= 0.5) {
                        bx0 = fmin(bx0, X), by0 = fmin(by0, Y);
                        bx1 = fmax(bx1, X + 1), by1 = fmax(by1, Y + 1);
                    }
                }
            }
            size_t o = (size_t)Y * (size_t)cw + (size_t)X;
            if (lin) {
                lin[o] = col.r;
                lin[o + (size_t)cw * (size_t)ch] = col.g;
                lin[o + 2 * (size_t)cw * (size_t)ch] = col.b;
            } else {
                d->canvas[o] = pack(d, col);
            }
        }
    }
    if (lin) {
        size_t n = (size_t)cw * (size_t)ch;
        for (int k = 0; k < 3; k++)
            blur_plane(lin + k * n, lin + k * n, tmp, cw, ch, sigma, sigma, EDGE_CLAMP);
        for (size_t o = 0; o < n; o++)
            d->canvas[o] = pack(d, (rgb){lin[o], lin[o + n], lin[o + 2 * n]});
        free(lin);
        free(tmp);
    }
    d->jug_box[0] = bx0, d->jug_box[1] = by0, d->jug_box[2] = bx1, d->jug_box[3] = by1;
    /* the table edge (world y = edge_y) on the canvas, at the canvas centre column */
    /* world y = px*s + py*c + h/2 = edge_y with px = 0 -> py = (edge_y - h/2) / c */
    d->edge_y0 = ccy + (edge_y - H / 2.0) / c;
    d->canvas_tilt = tilt_deg;
    d->canvas_sigma = sigma;
    return 0;
}

static double tabletop_base_tilt(const demo_source *d)
{
    uint64_t st = d->seed ^ 0x5EED7117ull;
    return 2.4 * (rnd01(&st) - 0.5); /* a tripod head a little off level */
}

static int tabletop_alloc(demo_source *d)
{
    d->mx = (int)(0.06 * d->w);
    d->my = (int)(0.06 * d->h);
    d->cw = d->w + 2 * d->mx;
    d->ch = d->h + 2 * d->my;
    d->canvas = malloc(sizeof(uint32_t) * (size_t)d->cw * (size_t)d->ch);
    if (!d->canvas)
        return -ENOMEM;
    return tabletop_render_canvas(d, tabletop_base_tilt(d), 0.0);
}

static void tabletop_render(demo_source *d, double t, uint8_t *dst, int stride, cap_truth *tr)
{
    /* Reframing drift: the camera slides on its head, whole pixels only so
     * every frame is an exact window of the canvas. */
    int ox = d->mx + (int)lround(0.85 * d->mx * wave(t, 23.0, d->ph[9]));
    int oy = d->my + (int)lround(0.6 * d->my * wave(t, 31.0, d->ph[10]));
    double ev = 0.4 * wave(t, 19.0, d->ph[11]);
    if (!isnan(d->pin.exposure_ev))
        ev = d->pin.exposure_ev;
    double e = exp2(ev);
    for (int i = 0; i < 256; i++) {
        uint32_t v = enc1(d, (float)(d->dec[i] * e));
        d->lr[i] = v << 16, d->lg[i] = v << 8, d->lb[i] = v;
    }
    for (int y = 0; y < d->h; y++) {
        const uint32_t *src = d->canvas + (size_t)(y + oy) * (size_t)d->cw + (size_t)ox;
        uint32_t *row = (uint32_t *)(dst + (size_t)y * (size_t)stride);
        for (int x = 0; x < d->w; x++) {
            uint32_t p = src[x];
            row[x] = d->lr[(p >> 16) & 255] | d->lg[(p >> 8) & 255] | d->lb[p & 255];
        }
    }
    memset(tr, 0, sizeof *tr);
    tr->valid = 1;
    double th = d->canvas_tilt * M_PI / 180.0;
    tr->horizon_deg = d->canvas_tilt;
    /* edge through (cw/2, edge_y0) rising to the right by tilt; frame column
     * w/2 is canvas column ox + w/2 */
    double X = ox + d->w / 2.0;
    tr->horizon_y = (d->edge_y0 - (X - d->cw / 2.0) * tan(th) - oy) / d->h;
    double x0 = clampd(d->jug_box[0] - ox, 0, d->w), x1 = clampd(d->jug_box[2] - ox, 0, d->w);
    double y0 = clampd(d->jug_box[1] - oy, 0, d->h), y1 = clampd(d->jug_box[3] - oy, 0, d->h);
    tr->subject_x = (x0 + x1) / 2 / d->w;
    tr->subject_y = (y0 + y1) / 2 / d->h;
    tr->subject_w = (x1 - x0) / d->w;
    tr->subject_h = (y1 - y0) / d->h;
    tr->exposure_ev = ev;
    tr->blur_sigma = d->canvas_sigma;
}

/* ---- the source ---------------------------------------------------------- */

static int demo_produce(cap_source *s, cap_mailbox *mb, cap_frame *meta)
{
    demo_source *d = (demo_source *)s;
    size_t bytes = (size_t)d->w * (size_t)d->h * 4;
    uint8_t *dst = cap_mailbox_begin(mb, bytes);
    if (!dst) {
        snprintf(s->note, sizeof s->note, "demo: a %dx%d frame does not fit the frame buffers",
                 d->w, d->h);
        return -ENOBUFS;
    }
    /* Scene time follows the frame count, so a run is repeatable whatever
     * the machine's speed. */
    double t = (double)d->seq / d->base.fps;
    cap_truth truth;
    cap_demo_render(s, t, dst, d->w * 4, &truth);
    cap_meta_xrgb(meta, dst, d->w, d->h, d->seq++);
    meta->truth = truth;
    return 0;
}

static void demo_destroy(cap_source *s)
{
    demo_source *d = (demo_source *)s;
    free(d->tex);
    free(d->texb);
    free(d->texk);
    free(d->tmp);
    free(d->sky);
    free(d->sea);
    free(d->band);
    free(d->mask);
    free(d->canvas);
    free(d);
}

static const cap_source_ops demo_ops = {
    .poll_fd = NULL, /* paced */
    .produce = demo_produce,
    .recover = NULL,
    .destroy = demo_destroy,
};

int cap_demo_render(cap_source *s, double t, uint8_t *dst, int stride, cap_truth *truth)
{
    if (!s || s->ops != &demo_ops || !dst || stride < 0)
        return -EINVAL;
    demo_source *d = (demo_source *)s;
    if (stride < d->w * 4)
        return -EINVAL;
    cap_truth tmp;
    if (!truth)
        truth = &tmp;
    if (d->scene == SCENE_HARBOUR)
        harbour_render(d, t, dst, stride, truth);
    else
        tabletop_render(d, t, dst, stride, truth);
    return 0;
}

int cap_demo_size(const cap_source *s, int *w, int *h)
{
    if (!s || s->ops != &demo_ops)
        return -EINVAL;
    const demo_source *d = (const demo_source *)s;
    *w = d->w;
    *h = d->h;
    return 0;
}

int cap_demo_set_pin(cap_source *s, const cap_demo_pin *pin)
{
    if (!s || s->ops != &demo_ops || !pin)
        return -EINVAL;
    demo_source *d = (demo_source *)s;
    if (!isnan(pin->blur_sigma) && (pin->blur_sigma < 0 || pin->blur_sigma > SIGMA_MAX))
        return -EINVAL;
    if (!isnan(pin->horizon_deg) && fabs(pin->horizon_deg) > 45)
        return -EINVAL;
    d->pin = *pin;
    if (d->scene == SCENE_TABLETOP) {
        /* The tabletop is drawn once: pinning its tilt or focus redraws it. */
        double tilt = isnan(pin->horizon_deg) ? tabletop_base_tilt(d) : pin->horizon_deg;
        double sigma = isnan(pin->blur_sigma) ? 0.0 : pin->blur_sigma;
        if (tilt != d->canvas_tilt || sigma != d->canvas_sigma)
            return tabletop_render_canvas(d, tilt, sigma);
    }
    return 0;
}

cap_source *cap_demo_open(const char *scene, const cap_source_opts *o, char *err, size_t errlen)
{
    static const cap_source_opts defaults = {0};
    if (!o)
        o = &defaults;
    int kind;
    if (!scene || !*scene || !strcmp(scene, "harbour"))
        kind = SCENE_HARBOUR;
    else if (!strcmp(scene, "tabletop"))
        kind = SCENE_TABLETOP;
    else {
        snprintf(err, errlen, "demo:%s: no such demo scene (try demo:harbour or demo:tabletop)", scene);
        return NULL;
    }
    int w = o->w > 0 ? o->w : DEF_W, h = o->h > 0 ? o->h : DEF_H;
    if (w < MIN_W || w > MAX_W || h < MIN_H || h > MAX_H) {
        snprintf(err, errlen, "demo: size %dx%d is outside %dx%d..%dx%d", w, h, MIN_W, MIN_H, MAX_W,
                 MAX_H);
        return NULL;
    }
    if (o->fps < 0 || o->fps > 240) {
        snprintf(err, errlen, "demo: frame rate %g is outside 1..240", o->fps);
        return NULL;
    }
    demo_source *d = calloc(1, sizeof *d);
    if (!d) {
        snprintf(err, errlen, "demo: out of memory");
        return NULL;
    }
    d->base.ops = &demo_ops;
    d->base.fps = o->fps > 0 ? o->fps : 30.0;
    d->base.live = 0;
    d->base.max_bytes = (size_t)w * (size_t)h * 4;
    d->scene = kind;
    d->w = w;
    d->h = h;
    d->seed = o->seed;
    d->pin = (cap_demo_pin){NAN, NAN, NAN};
    uint64_t st = o->seed ^ 0xD1CEB0A7ull;
    for (int i = 0; i < 12; i++)
        d->ph[i] = 2 * M_PI * rnd01(&st);
    build_transfer(d);
    int rc = kind == SCENE_HARBOUR ? harbour_alloc(d) : tabletop_alloc(d);
    if (rc < 0) {
        snprintf(err, errlen, "demo: out of memory for a %dx%d scene", w, h);
        demo_destroy(&d->base);
        return NULL;
    }
    snprintf(d->base.name, sizeof d->base.name, "demo: %s, %dx%d",
             kind == SCENE_HARBOUR ? "harbour at dusk" : "studio tabletop", w, h);
    return &d->base;
}
