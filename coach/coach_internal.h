/* Internals shared between the files of the coach library. */
#ifndef VFCOACH_COACH_INTERNAL_H
#define VFCOACH_COACH_INTERNAL_H

#include "coach/coach.h"
#ifdef __SSE2__
#include <xmmintrin.h>
#endif

/* The downscaled analysis image the tone pass builds from the full frame.
 * Each analysis pixel is the box mean of a scale x scale block of the full
 * frame, scale = max(1, w / 320) (so aw is 320..639 for w >= 320).  All
 * planes are aw*ah floats, row-major, no padding, owned by the analyzer and
 * valid until the next coach_analyze(). */
typedef struct coach_aimg {
    int w, h;            /* analysis size in pixels                          */
    int scale;           /* full-resolution pixels per analysis pixel (box)  */
    const float *luma;   /* 8-bit gamma-encoded luma units 0..255 (BT.709)   */
    const float *r, *g, *b; /* 8-bit sRGB units 0..255                      */
    const float *lap_sq; /* mean of L^2 over the block, L = full-res 3x3 Laplacian of 8-bit luma (border pixels use reflect-101, OpenCV's default) */
    const float *lap;    /* mean of L over the block                         */
} coach_aimg;

/* Composition state (level, horizon, subject, balance, lead room,
 * steadiness, subject focus): compose.c and the files it uses. */
typedef struct coach_compose coach_compose;

/* Preallocates for analysis images up to max_aw x max_ah. NULL on failure. */
coach_compose *coach_compose_create(int max_aw, int max_ah);
void coach_compose_destroy(coach_compose *c);
void coach_compose_reset(coach_compose *c);
/* Fills the composition fields of *out (has_tilt ... subject_focus) from the
 * analysis image; t in seconds for motion; full_w/full_h for pixel units.
 * Must not allocate. */
void coach_compose_run(coach_compose *c, const coach_aimg *img, int full_w, int full_h,
                       double t, const coach_config *cfg, coach_result *out);

/* ---- tone pass (tone.c) ------------------------------------------------ */

#define COACH_AIMG_TARGET_W 320 /* analysis width: scale = max(1, w / this)  */
#define COACH_CLIP_HIGH 250     /* luma >= this counts as clipped highlight   */
#define COACH_CLIP_LOW 5        /* luma <= this counts as clipped shadow      */

typedef struct coach_tone coach_tone;

/* Preallocates for frames up to max_w x max_h (0: on the first frame). */
coach_tone *coach_tone_create(int max_w, int max_h);
void coach_tone_destroy(coach_tone *t);
/* 0 if the view is analysable, else -EINVAL. */
int coach_tone_check(const coach_frame *f);
/* Analysis image size for a frame size (the rule described at coach_aimg). */
void coach_tone_geometry(int w, int h, int *scale, int *aw, int *ah);
/* The full-resolution pass: fills width, height, mean_luma, exposure_ev,
 * clip_high, clip_low, hist, colourfulness, sharpness of *out and the
 * analysis image *img.  Allocates only when the frame is larger than any
 * before; returns 0, -EINVAL or -ENOMEM. */
int coach_tone_run(coach_tone *t, const coach_frame *f, coach_result *out, coach_aimg *img);
/* Chooses the hand-vectorised kernels (1, the default where the CPU has
 * them) or the portable ones (0); returns the previous choice.  For tests:
 * both must give identical results. */
int coach_tone_set_simd(coach_tone *t, int on);
/* sRGB decoding (IEC 61966-2-1): encoded 0..1 -> linear 0..1. */
double coach_srgb_decode(double v);

/* ---- score (score.c) --------------------------------------------------- */

/* Temporal state of the score: smoothing and the ready cue. */
typedef struct coach_score_state {
    int have;              /* a previous frame exists                       */
    double t_last;         /* its time, seconds                             */
    double score;          /* smoothed score                                */
    int ready;
    int above;             /* score has been >= ready_enter since above_t   */
    double above_t;
    double sharp_peak;     /* decaying maximum of the frame sharpness       */
    uint32_t prev_hist[256]; /* luma histogram of the previous frame: a cut
                                to another scene restarts sharp_peak        */
} coach_score_state;

void coach_score_reset(coach_score_state *s);
/* Tracks the scene's recent best sharpness at time t and fills
 * r->sharpness_ref; call before coach_score_terms. */
void coach_score_sharpness_ref(coach_score_state *s, double t, coach_result *r);
/* Fills terms, nterms and score_raw of *r from its measurements; have_prev
 * says whether frame-to-frame terms (steadiness) are meaningful. */
void coach_score_terms(const coach_config *cfg, int have_prev, coach_result *r);
/* One smoothing step: alpha = 1 - exp(-dt / tau); returns the new value. */
double coach_smooth_step(double prev, double raw, double dt, double tau);
/* Smoothing and ready hysteresis at time t: fills score and ready. */
void coach_score_update(coach_score_state *s, const coach_config *cfg, double t, coach_result *r);
/* Fills hints and nhints, worst term first (at most COACH_MAX_HINTS). */
void coach_score_hints(const coach_config *cfg, coach_result *r);

/* ---- text without stdio (json.c) --------------------------------------- */

/* An snprintf-like appender: writes what fits (always NUL-terminated when
 * n > 0) and counts the length it would need in len. */
typedef struct coach_sbuf { char *p; size_t n, len; } coach_sbuf;
void coach_sb_str(coach_sbuf *b, const char *s);
void coach_sb_chr(coach_sbuf *b, char c);
/* Fixed-point number with at most `decimals` digits after the point,
 * trailing zeros dropped; "null" for NaN/Inf. */
void coach_sb_num(coach_sbuf *b, double v, int decimals);

/* ---- composition internals (compose*.c, level.c, saliency.c, motion.c) -- */

/* Vectorised kernels of the composition files.  COACH_O3 at the top of a
 * file asks GCC for -O3 there: the release build is -O2, whose vectoriser
 * leaves loops with a run-time trip count scalar (tone.c does the same).
 * COACH_AVX2 is 1 where a kernel may have a copy compiled for AVX2 (the
 * same operations, so the same results; no FMA), used when
 * coach_cpu_avx2() says the CPU has it.  Function attributes and
 * __builtin_cpu_supports, not ifunc/target_clones: their resolvers run
 * before the sanitiser runtimes start and crashed those builds. */
#if defined(__GNUC__) && !defined(__clang__) && defined(__OPTIMIZE__)
#define COACH_O3 _Pragma("GCC optimize(\"O3\")")
#else
#define COACH_O3
#endif
#if defined(__x86_64__) && defined(__GNUC__) && !defined(__clang__)
#define COACH_AVX2 1
static inline int coach_cpu_avx2(void)
{
    __builtin_cpu_init();
    return __builtin_cpu_supports("avx2") != 0;
}
#else
#define COACH_AVX2 0
static inline int coach_cpu_avx2(void) { return 0; }
#endif

/* Sum of a[0 .. n-1] in four interleaved lanes (element i into lane
 * i % 4), the lanes added last: a fixed order, the same with or without
 * vector units, that runs four at a time; one running float sum is a
 * chain of dependent additions that cannot. */
static inline float coach_sum4(const float *a, int n)
{
    float l[4] = {0, 0, 0, 0};
    int i = 0;
#ifdef __SSE2__
    __m128 v = _mm_setzero_ps();
    for (; i + 4 <= n; i += 4)
        v = _mm_add_ps(v, _mm_loadu_ps(a + i));
    _mm_storeu_ps(l, v);
#else
    for (; i + 4 <= n; i += 4)
        for (int j = 0; j < 4; j++)
            l[j] += a[i + j];
#endif
    for (; i < n; i++)
        l[i & 3] += a[i];
    return ((l[0] + l[1]) + l[2]) + l[3];
}

/* Power-of-two complex FFT plan, no allocation (compose_fft.c). */
#define COACH_FFT_MAX 128
typedef struct coach_fft_plan {
    int n, log2n;
    float tw_re[COACH_FFT_MAX / 2], tw_im[COACH_FFT_MAX / 2];
    uint16_t rev[COACH_FFT_MAX];
    int simd;       /* 1: the AVX2 butterflies (same results), set by init */
} coach_fft_plan;
/* 0, or -1 when n is not a power of two in 2..COACH_FFT_MAX. */
int coach_fft_plan_init(coach_fft_plan *p, int n);
/* In-place 2-D FFT of px->n x py->n interleaved complex floats (row-major);
 * scratch holds as many; the inverse is unscaled. */
void coach_fft2d(const coach_fft_plan *px, const coach_fft_plan *py, float *data, float *scratch,
                 int inverse);
/* The same in halves that skip the transposes a forward and an inverse
 * transform in a row make undone: coach_fft2d_fwd_t leaves the spectrum
 * of data (overwritten) transposed in out, px->n rows of py->n (frequency
 * (u, v) at out[u * py->n + v]); coach_fft2d_inv_t takes such a spectrum
 * (overwritten) back to py->n rows of px->n in out, unscaled, running the
 * x transforms first (the same up to float rounding). */
void coach_fft2d_fwd_t(const coach_fft_plan *px, const coach_fft_plan *py, float *data, float *out);
void coach_fft2d_inv_t(const coach_fft_plan *px, const coach_fft_plan *py, float *spec, float *out);

/* Two real w x h signals a and b transformed together as z = a + i b: reads
 * their spectra A(u,v) = (Z(k) + conj Z(-k)) / 2 and B(u,v) = (Z(k) - conj
 * Z(-k)) / 2i at one frequency of the transformed z (interleaved complex,
 * row-major).  Shared by the saliency and the motion estimate. */
static inline void coach_fft_split_pair(const float *z, int w, int h, int u, int v, float A[2],
                                        float B[2])
{
    int k = v * w + u, km = ((h - v) % h) * w + (w - u) % w;
    float zr = z[2 * k], zi = z[2 * k + 1];
    float mr = z[2 * km], mi = z[2 * km + 1];
    A[0] = 0.5f * (zr + mr);
    A[1] = 0.5f * (zi - mi);
    B[0] = 0.5f * (zi + mi);
    B[1] = -0.5f * (zr - mr);
}

/* Level and horizon from straight lines (level.c).  Coordinates are
 * analysis pixels with pixel centres at integers. */
typedef struct coach_level coach_level;
typedef struct coach_level_est {
    int has_tilt;
    double tilt_deg;             /* + when the line's right end is higher    */
    coach_level_source source;
    double confidence;           /* 0..1                                     */
    int has_horizon;
    double horizon_a, horizon_b; /* horizon: y = a + b * x                   */
    int nlines;                  /* lines that agreed (verticals), 1 horizon  */
    /* The strongest Hough peak of the family used (horizontal family when no
     * level was found), sub-bin refined, as x cos(theta) + y sin(theta) = rho
     * with theta in [0, 180) degrees. has_peak 0 when no cell passed. */
    int has_peak;
    double peak_theta_deg, peak_rho;
} coach_level_est;
coach_level *coach_level_create(int max_w, int max_h);
void coach_level_destroy(coach_level *l);
void coach_level_run(coach_level *l, const float *luma, int w, int h, coach_level_est *out);
/* Chooses the AVX2 copy of the Sobel pass (1, the default where the CPU
 * has it) or the portable one (0); returns the previous choice.  For
 * tests: both must give identical results. */
int coach_level_set_simd(coach_level *l, int on);

/* Spectral residual saliency at COACH_SAL_N x COACH_SAL_N (saliency.c). */
#define COACH_SAL_N 64
typedef struct coach_saliency coach_saliency;
typedef struct coach_salient {
    int has_subject;
    coach_box subject;           /* fractions of the map = of the image      */
    double balance_lr, balance_tb;
    unsigned edges;              /* COACH_EDGE_* bits                        */
} coach_salient;
coach_saliency *coach_saliency_create(int max_w, int max_h);
void coach_saliency_destroy(coach_saliency *s);
/* Computes the map (normalised to max 1; all 0 for a blank image) and the
 * subject, balance and intrusions from it; with the colour planes (r, g, b
 * may be NULL) a subject distinct in colour from the whole border is
 * located on its colour contrast instead.  hline (NULL: none) is the
 * horizon in map cells, y = hline[0] + hline[1] * x: pieces of it where it
 * meets the sides are not intrusions.  Returns the map. */
const float *coach_saliency_run(coach_saliency *s, const float *luma, const float *r,
                                const float *g, const float *b, int w, int h,
                                const double *hline, coach_salient *out);

/* Global frame-to-frame shift by phase correlation (motion.c). */
typedef struct coach_motion coach_motion;
/* Preallocates for analysis images up to max_w wide. */
coach_motion *coach_motion_create(int max_w);
void coach_motion_destroy(coach_motion *m);
void coach_motion_reset(coach_motion *m);
/* Shift of this frame's content against the previous one, analysis pixels
 * (+x right, +y down), leaving out the region around exclude (the subject's
 * box in fractions of the analysis image; NULL for none) in this frame and
 * the one given with the previous frame.  Returns 1 when measured, 0 on the
 * first frame or when either frame has too little texture. */
int coach_motion_run(coach_motion *m, const float *luma, int w, int h, const coach_box *exclude,
                     double *dx, double *dy);

/* Debug views of the last coach_compose_run (the inspect subcommand): the
 * level estimate, and the saliency map (COACH_SAL_N^2, NULL before a run). */
const coach_level_est *coach_compose_level(const coach_compose *c);
const float *coach_compose_saliency(const coach_compose *c);

#endif
