/* The tone pass: one fused, row-wise walk over the full-resolution frame.
 *
 * For every row it unpacks the pixel format into planar 8-bit R', G', B' and
 * luma rows (small, L1-resident; the packed RGB layouts skip the planar
 * copies and work from the pixels in one fused loop, and with AVX2 the
 * Y'CbCr layouts do their unpacking, colour and block sums in one loop too),
 * then
 *   - counts clipped pixels (every pixel) and the luma histogram (a
 *     quarter of them, see hist_row),
 *   - sums linear relative luminance through 256-entry sRGB LUTs (exposure;
 *     on a sixteenth of the pixels, see lin_row),
 *   - sums R-G and (R+G)/2-B and their squares (colourfulness),
 *   - adds the row into per-column block accumulators (analysis image),
 *   - and, one row behind, evaluates the 3x3 Laplacian of luma from a 3-row
 *     ring and sums L and L^2 (sharpness, and the lap planes).
 * Every loop but the histogram/LUT one is branch-free integer work over
 * contiguous arrays so the compiler can vectorise it; nothing is divided or
 * converted to float per pixel.  The frame is read exactly once.
 *
 * Border rule of the Laplacian: OpenCV's default, BORDER_REFLECT_101 (the
 * row/column outside the frame mirrors the one inside, without repeating the
 * edge: x = -1 reads x = 1).  So the variance is taken over all w*h pixels
 * and equals cv2.Laplacian(luma, cv2.CV_64F).var() exactly, not just within
 * a tolerance; tests/check_laplacian.sh checks that.  The lap planes of the
 * analysis image use the same values.
 */
#include <errno.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "coach/coach_internal.h"

#if defined(__x86_64__) && defined(__GNUC__) && !defined(__clang__) && \
    defined(__ORDER_LITTLE_ENDIAN__) && __BYTE_ORDER__ == __ORDER_LITTLE_ENDIAN__
#define TONE_AVX2 1
#include <immintrin.h>
#else
#define TONE_AVX2 0
#endif

/* The kernels below are written for the auto-vectoriser.  The program's
 * release build is -O2, where GCC only vectorises the cheapest loops, so
 * this file asks for -O3 when optimising at all; on x86-64 the kernels are
 * also built a second time for AVX2 and picked when the analyzer is made
 * (tone_kernels below), which halves their cost on machines that have it
 * and changes no result (integer maths).  The hottest rows (packed RGB and
 * Y'CbCr pixels, the Laplacian at even block widths, the clip counts) also
 * have hand-written AVX2 versions, chosen at run time and bit-identical to
 * the portable loops (tests/test_coach.c runs both).
 *
 * Where the time goes at 1080p on one core of the development machine
 * (callgrind instructions a frame, 18.5 M in all; 1.5-2.3 ms of thread
 * CPU time, the same whether the frame is cached or not, so the pass is
 * bound by its instructions, not by memory): the XRGB row with the colour
 * sums and block sums 8.6 M; the Laplacian with its sums 3.9 M; exposure
 * samples 2.1 M; histogram 1.3 M; clip counts 0.9 M; block flushes 0.6 M.
 * Counting the histogram inside the AVX2 XRGB loop was tried: slower
 * (register pressure), so it stays a loop of its own. */
#if defined(__GNUC__) && !defined(__clang__) && defined(__OPTIMIZE__)
#pragma GCC optimize("O3")
#endif
/* Each such kernel is an always-inline body (KBODY) instantiated twice,
 * portable and with target("avx2"), and reached through a table of function
 * pointers chosen once with __builtin_cpu_supports in coach_tone_create.
 * Not target_clones: its ifunc resolvers run while the dynamic loader
 * relocates the program, before a sanitiser's runtime is initialised, and
 * the thread-sanitiser build crashed there before main().  One indirect
 * call per row costs nothing measurable. */
#define KBODY static inline __attribute__((always_inline))
/* Table lookups must stay scalar: "vectorised" they become lane-by-lane
 * inserts and extracts, slower than plain loads. */
#if defined(__GNUC__) && !defined(__clang__) && defined(__OPTIMIZE__)
#define SCALAR __attribute__((optimize("no-tree-vectorize")))
#else
#define SCALAR
#endif

/* BT.709 luma weights (ITU-R BT.709-6 item 3.2) in 1/65536 units; they add
 * up to exactly 65536 so 255,255,255 maps to 255. */
enum { LW_R = 13933, LW_G = 46871, LW_B = 4732 };

/* The Laplacian's L^2 sums run in int32 over chunks short enough that
 * CHUNK * 1020^2 cannot overflow. */
#define LAP_CHUNK 2048

struct coach_tone {
    int cap_w;                 /* row buffers sized for this width        */
    size_t cap_plane;          /* floats per analysis plane               */
    uint8_t *r, *g, *b;        /* current row, planar                     */
    uint8_t *ring;             /* 3 luma rows                             */
    int16_t *lap;              /* Laplacian of one row                    */
    uint16_t *acc;             /* 4 * cap_w: block column sums r, g, b, y */
    int32_t *accl;             /* block column sums of L                  */
    int32_t *accq;             /* block column sums of L^2                */
    int32_t *tmp;              /* one row of block sums                   */
    float *planes;             /* 6 * cap_plane: luma, r, g, b, lap, lap_sq */
    uint32_t hist8[8][256];    /* 8 interleaved histograms: runs of one value do
                                  not serialise on store forwarding */
    uint32_t lin[3][256];      /* K_c * sRGB-decoded(v) * 2^24, c = R,G,B */
    uint32_t lin_grey[256];    /* sRGB-decoded(v) * 2^24                  */
    int simd;                  /* use the AVX2 kernels (CPU has them)     */
    const struct tone_kernels *k; /* portable or AVX2 set, per simd       */
};

static const struct tone_kernels *tone_kernels_pick(int simd);

double coach_srgb_decode(double v)
{
    /* IEC 61966-2-1:1999, 5.2 (inverse of the sRGB transfer). */
    return v <= 0.04045 ? v / 12.92 : pow((v + 0.055) / 1.055, 2.4);
}

static void *xalloc(size_t n)
{
    /* 64-byte alignment helps the vector loops; round the size up as C11's
     * aligned_alloc requires. */
    return aligned_alloc(64, (n + 63) & ~(size_t)63);
}

/* The row buffers (made for a width); the planes are sized apart. */
static void free_rows(coach_tone *t)
{
    free(t->r);
    free(t->ring);
    free(t->lap);
    free(t->acc);
    free(t->accl);
    free(t->accq);
    free(t->tmp);
    t->r = t->g = t->b = t->ring = NULL;
    t->lap = NULL;
    t->acc = NULL;
    t->accl = t->accq = t->tmp = NULL;
    t->cap_w = 0;
}

static void free_bufs(coach_tone *t)
{
    free_rows(t);
    free(t->planes);
    t->planes = NULL;
    t->cap_plane = 0;
}

static int grow_rows(coach_tone *t, int w)
{
    if (w <= t->cap_w)
        return 0;
    free_rows(t);
    size_t W = (size_t)w + 64; /* slack: loops may read a little past w */
    t->r = xalloc(3 * W);
    t->ring = xalloc(3 * W);
    t->lap = xalloc(W * sizeof(int16_t));
    t->acc = xalloc(4 * W * sizeof(uint16_t));
    t->accl = xalloc(W * sizeof(int32_t));
    t->accq = xalloc(W * sizeof(int32_t));
    t->tmp = xalloc(W * sizeof(int32_t));
    if (!t->r || !t->ring || !t->lap || !t->acc || !t->accl || !t->accq || !t->tmp) {
        free_bufs(t);
        return -ENOMEM;
    }
    t->g = t->r + W;
    t->b = t->g + W;
    t->cap_w = w;
    return 0;
}

static int grow_planes(coach_tone *t, size_t n)
{
    if (n <= t->cap_plane)
        return 0;
    float *p = xalloc(6 * n * sizeof(float));
    if (!p)
        return -ENOMEM;
    free(t->planes);
    t->planes = p;
    t->cap_plane = n;
    return 0;
}

void coach_tone_geometry(int w, int h, int *scale, int *aw, int *ah)
{
    int s = w / COACH_AIMG_TARGET_W;
    if (s < 1)
        s = 1;
    *scale = s;
    *aw = w / s;
    *ah = h / s;
}

coach_tone *coach_tone_create(int max_w, int max_h)
{
    coach_tone *t = calloc(1, sizeof(*t));
    if (!t)
        return NULL;
    static const double k[3] = { 0.2126, 0.7152, 0.0722 }; /* BT.709-6 3.2 */
    for (int v = 0; v < 256; v++) {
        double lin = coach_srgb_decode(v / 255.0);
        for (int c = 0; c < 3; c++)
            t->lin[c][v] = (uint32_t)lrint(k[c] * lin * 16777216.0);
        t->lin_grey[v] = (uint32_t)lrint(lin * 16777216.0);
    }
#if TONE_AVX2
    __builtin_cpu_init();
    t->simd = __builtin_cpu_supports("avx2");
#endif
    t->k = tone_kernels_pick(t->simd);
    if (max_w > 0 && max_h > 0) {
        int s, aw, ah;
        coach_tone_geometry(max_w, max_h, &s, &aw, &ah);
        if (grow_rows(t, max_w) || grow_planes(t, (size_t)aw * ah)) {
            coach_tone_destroy(t);
            return NULL;
        }
    }
    return t;
}

int coach_tone_set_simd(coach_tone *t, int on)
{
#if TONE_AVX2
    int had = t->simd;
    t->simd = on && __builtin_cpu_supports("avx2");
    t->k = tone_kernels_pick(t->simd);
    return had;
#else
    (void)t;
    (void)on;
    return 0;
#endif
}

void coach_tone_destroy(coach_tone *t)
{
    if (!t)
        return;
    free_bufs(t);
    free(t);
}

/* ---- row unpacking: planar R', G', B' and 8-bit luma ------------------- */

static inline uint8_t luma709(unsigned r, unsigned g, unsigned b)
{
    return (uint8_t)((LW_R * r + LW_G * g + LW_B * b + 32768u) >> 16);
}

/* Packed pixels (XRGB8888, the program's own format; RGB24 and BGR24, what
 * cameras' MJPEG becomes through libv4lconvert) in one fused loop: luma,
 * the colourfulness sums and the block column sums straight from the
 * pixels, with no planar copies to write and read back. */
typedef struct colour_sums { int32_t srg, syb, qrg, qyb; } colour_sums;
enum { PK_XRGB, PK_RGB24, PK_BGR24 };

/* Byte k of a pixel word read with memcpy, whatever the host's byte order. */
#if defined(__BYTE_ORDER__) && __BYTE_ORDER__ == __ORDER_BIG_ENDIAN__
#define SH_B 24
#define SH_G 16
#define SH_R 8
#else
#define SH_B 0
#define SH_G 8
#define SH_R 16
#endif

/* Pixel x of a packed row; pk is a constant at every call. */
static inline __attribute__((always_inline)) void load_px(const uint8_t *restrict p, int pk,
                                                          size_t x, int *R, int *G, int *B)
{
    if (pk == PK_XRGB) {
        uint32_t v;
        memcpy(&v, p + 4 * x, 4);
        *R = (int)((v >> SH_R) & 255u);
        *G = (int)((v >> SH_G) & 255u);
        *B = (int)((v >> SH_B) & 255u);
    } else {
        const uint8_t *q = p + 3 * x;
        *R = q[pk == PK_RGB24 ? 0 : 2];
        *G = q[1];
        *B = q[pk == PK_RGB24 ? 2 : 0];
    }
}

KBODY void packed_fused_k(const uint8_t *restrict p, int pk, int x0, int x1,
                          uint8_t *restrict y, uint16_t *restrict ar, uint16_t *restrict ag,
                          uint16_t *restrict ab, uint16_t *restrict ay, int first, int acc,
                          colour_sums *cs)
{
    int32_t srg = 0, syb = 0, qrg = 0, qyb = 0;
#define PACKED_PIXEL()                                                        \
    int R, G, B;                                                              \
    load_px(p, pk, (size_t)x, &R, &G, &B);                                    \
    int Y = (LW_R * R + LW_G * G + LW_B * B + 32768) >> 16;                   \
    y[x] = (uint8_t)Y;                                                        \
    int rg = R - G, yb = R + G - 2 * B;                                       \
    srg += rg;                                                                \
    syb += yb;                                                                \
    qrg += rg * rg;                                                           \
    qyb += yb * yb
    if (acc && first) {
        for (int x = x0; x < x1; x++) {
            PACKED_PIXEL();
            ar[x] = (uint16_t)R;
            ag[x] = (uint16_t)G;
            ab[x] = (uint16_t)B;
            ay[x] = (uint16_t)Y;
        }
    } else if (acc) {
        for (int x = x0; x < x1; x++) {
            PACKED_PIXEL();
            ar[x] = (uint16_t)(ar[x] + R);
            ag[x] = (uint16_t)(ag[x] + G);
            ab[x] = (uint16_t)(ab[x] + B);
            ay[x] = (uint16_t)(ay[x] + Y);
        }
    } else {
        for (int x = x0; x < x1; x++) {
            PACKED_PIXEL();
        }
    }
#undef PACKED_PIXEL
    cs->srg += srg;
    cs->syb += syb;
    cs->qrg += qrg;
    cs->qyb += qyb;
}

#if TONE_AVX2
/* The colour sums of the fused AVX2 loops, per 32-bit lane. */
typedef struct colour_vec { __m256i srg, syb, qrg, qyb; } colour_vec;

/* 16 pixels' R', G', B' and luma in 16-bit lanes: their colour sums, and
 * into the block column sums from column x on (the first row of a block
 * assigns, later rows add). */
__attribute__((target("avx2"))) static inline __attribute__((always_inline)) void
colour_acc16(colour_vec *cv, __m256i R, __m256i G, __m256i B, __m256i Y, int x,
             uint16_t *restrict ar, uint16_t *restrict ag, uint16_t *restrict ab,
             uint16_t *restrict ay, int first, int acc)
{
    const __m256i one = _mm256_set1_epi16(1);
    __m256i rg = _mm256_sub_epi16(R, G);
    __m256i yb = _mm256_sub_epi16(_mm256_add_epi16(R, G), _mm256_add_epi16(B, B));
    cv->srg = _mm256_add_epi32(cv->srg, _mm256_madd_epi16(rg, one));
    cv->syb = _mm256_add_epi32(cv->syb, _mm256_madd_epi16(yb, one));
    cv->qrg = _mm256_add_epi32(cv->qrg, _mm256_madd_epi16(rg, rg));
    cv->qyb = _mm256_add_epi32(cv->qyb, _mm256_madd_epi16(yb, yb));
    if (acc) {
        __m256i *pr = (__m256i *)(ar + x), *pg = (__m256i *)(ag + x);
        __m256i *pb = (__m256i *)(ab + x), *py = (__m256i *)(ay + x);
        if (!first) {
            R = _mm256_add_epi16(R, _mm256_loadu_si256(pr));
            G = _mm256_add_epi16(G, _mm256_loadu_si256(pg));
            B = _mm256_add_epi16(B, _mm256_loadu_si256(pb));
            Y = _mm256_add_epi16(Y, _mm256_loadu_si256(py));
        }
        _mm256_storeu_si256(pr, R);
        _mm256_storeu_si256(pg, G);
        _mm256_storeu_si256(pb, B);
        _mm256_storeu_si256(py, Y);
    }
}

/* By value, inlined: the accumulators' address must not escape, or they
 * stop living in registers across the loop. */
__attribute__((target("avx2"))) static inline __attribute__((always_inline)) void
colour_reduce(colour_vec cv, colour_sums *cs)
{
    int32_t lane[8];
    const __m256i sums[4] = { cv.srg, cv.syb, cv.qrg, cv.qyb };
    int32_t tot[4] = { 0, 0, 0, 0 };
    for (int k = 0; k < 4; k++) {
        _mm256_storeu_si256((__m256i *)lane, sums[k]);
        for (int i = 0; i < 8; i++)
            tot[k] += lane[i];
    }
    cs->srg += tot[0];
    cs->syb += tot[1];
    cs->qrg += tot[2];
    cs->qyb += tot[3];
}
#endif

#if TONE_AVX2
/* Bytes ahead to prefetch: frames arrive cold from the camera's DMA. */
#define PREFETCH_AHEAD 2048
/* The same loop by hand for AVX2, 16 pixels a step: the compiler's version
 * of the fused loop runs out of registers and spills.  Same integer maths,
 * bit-identical results (tests run both).  3-byte pixels are first spread
 * into the XRGB word layout: each 128-bit half of a register takes 4
 * pixels (12 bytes) and one byte shuffle places them; the second register's
 * upper half starts 4 bytes early so no load reads past the 16 pixels. */
__attribute__((target("avx2"))) static inline __attribute__((always_inline)) void
packed_avx2(const uint8_t *restrict p, int pk, int x0, int x1, uint8_t *restrict y,
            uint16_t *restrict ar, uint16_t *restrict ag, uint16_t *restrict ab,
            uint16_t *restrict ay, int first, int acc, colour_sums *cs)
{
    /* byte sources of B, G, R in each 4-pixel half (-1: zero) */
    const int rb = pk == PK_RGB24 ? 2 : 0, bb = 2 - rb;
#define SH3(o) (char)(rb + (o)), (char)(1 + (o)), (char)(bb + (o)), -1
    const __m256i m3a = _mm256_setr_epi8(SH3(0), SH3(3), SH3(6), SH3(9), SH3(0), SH3(3), SH3(6), SH3(9));
    const __m256i m3b = _mm256_setr_epi8(SH3(0), SH3(3), SH3(6), SH3(9), SH3(4), SH3(7), SH3(10), SH3(13));
#undef SH3
    const size_t bpp = pk == PK_XRGB ? 4 : 3;
    const __m256i m255 = _mm256_set1_epi32(255), half = _mm256_set1_epi32(32768);
    const __m256i wr = _mm256_set1_epi32(LW_R), wg = _mm256_set1_epi32(LW_G),
                  wb = _mm256_set1_epi32(LW_B);
    colour_vec cv = { _mm256_setzero_si256(), _mm256_setzero_si256(), _mm256_setzero_si256(),
                      _mm256_setzero_si256() };
    int x = x0;
    for (; x + 16 <= x1; x += 16) {
        const uint8_t *q = p + bpp * (size_t)x;
        _mm_prefetch((const char *)(q + PREFETCH_AHEAD), _MM_HINT_T0);
        __m256i v0, v1;
        if (pk == PK_XRGB) {
            v0 = _mm256_loadu_si256((const __m256i *)q);
            v1 = _mm256_loadu_si256((const __m256i *)(q + 32));
        } else {
            v0 = _mm256_shuffle_epi8(_mm256_loadu2_m128i((const __m128i *)(q + 12),
                                                         (const __m128i *)q), m3a);
            v1 = _mm256_shuffle_epi8(_mm256_loadu2_m128i((const __m128i *)(q + 32),
                                                         (const __m128i *)(q + 24)), m3b);
        }
        __m256i b0 = _mm256_and_si256(v0, m255), b1 = _mm256_and_si256(v1, m255);
        __m256i g0 = _mm256_and_si256(_mm256_srli_epi32(v0, 8), m255);
        __m256i g1 = _mm256_and_si256(_mm256_srli_epi32(v1, 8), m255);
        __m256i r0 = _mm256_and_si256(_mm256_srli_epi32(v0, 16), m255);
        __m256i r1 = _mm256_and_si256(_mm256_srli_epi32(v1, 16), m255);
        __m256i y0 = _mm256_srli_epi32(
            _mm256_add_epi32(_mm256_add_epi32(_mm256_mullo_epi32(r0, wr), _mm256_mullo_epi32(g0, wg)),
                             _mm256_add_epi32(_mm256_mullo_epi32(b0, wb), half)), 16);
        __m256i y1 = _mm256_srli_epi32(
            _mm256_add_epi32(_mm256_add_epi32(_mm256_mullo_epi32(r1, wr), _mm256_mullo_epi32(g1, wg)),
                             _mm256_add_epi32(_mm256_mullo_epi32(b1, wb), half)), 16);
        /* 32 -> 16 bit: the pack interleaves 128-bit lanes, the permute
         * puts the 16 pixels back in order */
        __m256i R = _mm256_permute4x64_epi64(_mm256_packus_epi32(r0, r1), 0xD8);
        __m256i G = _mm256_permute4x64_epi64(_mm256_packus_epi32(g0, g1), 0xD8);
        __m256i B = _mm256_permute4x64_epi64(_mm256_packus_epi32(b0, b1), 0xD8);
        __m256i Y = _mm256_permute4x64_epi64(_mm256_packus_epi32(y0, y1), 0xD8);
        __m256i y8 = _mm256_permute4x64_epi64(_mm256_packus_epi16(Y, Y), 0xD8);
        _mm_storeu_si128((__m128i *)(y + x), _mm256_castsi256_si128(y8));
        colour_acc16(&cv, R, G, B, Y, x, ar, ag, ab, ay, first, acc);
    }
    colour_reduce(cv, cs);
    if (x < x1) /* the last few pixels */
        packed_fused_k(p, pk, x, x1, y, ar, ag, ab, ay, first, acc, cs);
}

#define PACKED_AVX2(NAME, PK)                                                   \
    __attribute__((target("avx2"))) static void NAME(                         \
        const uint8_t *restrict p, int x0, int x1, uint8_t *restrict y,       \
        uint16_t *restrict ar, uint16_t *restrict ag, uint16_t *restrict ab,  \
        uint16_t *restrict ay, int first, int acc, colour_sums *cs)           \
    {                                                                         \
        packed_avx2(p, PK, x0, x1, y, ar, ag, ab, ay, first, acc, cs);        \
    }
PACKED_AVX2(xrgb_avx2, PK_XRGB)
PACKED_AVX2(rgb24_avx2, PK_RGB24)
PACKED_AVX2(bgr24_avx2, PK_BGR24)
#endif

/* Y'CbCr -> R'G'B' in 1/16384 units, per ITU-R BT.601-7 / BT.709-6:
 * E'R = E'Y + 2(1-Kr) Cr, E'B = E'Y + 2(1-Kb) Cb,
 * E'G = E'Y - 2Kr(1-Kr)/Kg Cr - 2Kb(1-Kb)/Kg Cb; limited range maps
 * Y' 16..235 and C 16..240 onto the full 0..255 / -127.5..127.5. */
typedef struct yuv_coef { int ky, y0, cr_r, cb_b, cr_g, cb_g; } yuv_coef;

static yuv_coef yuv_coefs(coach_matrix m, coach_range rg)
{
    double kr = m == COACH_MATRIX_BT709 ? 0.2126 : 0.299;
    double kb = m == COACH_MATRIX_BT709 ? 0.0722 : 0.114;
    double kg = 1.0 - kr - kb;
    double sy = rg == COACH_RANGE_FULL ? 1.0 : 255.0 / 219.0;
    double sc = rg == COACH_RANGE_FULL ? 1.0 : 255.0 / 224.0;
    yuv_coef c;
    c.ky = (int)lrint(sy * 16384);
    c.y0 = rg == COACH_RANGE_FULL ? 0 : 16;
    c.cr_r = (int)lrint(2 * (1 - kr) * sc * 16384);
    c.cb_b = (int)lrint(2 * (1 - kb) * sc * 16384);
    c.cr_g = (int)lrint(2 * kr * (1 - kr) / kg * sc * 16384);
    c.cb_g = (int)lrint(2 * kb * (1 - kb) / kg * sc * 16384);
    return c;
}

static inline uint8_t clamp8_q14(int v)
{
    v = (v + 8192) >> 14;
    v = v < 0 ? 0 : v;
    return (uint8_t)(v > 255 ? 255 : v);
}

/* Two pixels sharing one chroma pair, written so the pair loops below
 * vectorise (coefficients in locals, branch-free clamps). */
#define YUV_PAIR(Y0, Y1, U, V, i)                                               \
    do {                                                                      \
        int cb_ = (int)(U) - 128, cr_ = (int)(V) - 128;                       \
        int dr_ = crr * cr_, db_ = cbb * cb_, dg_ = -crg * cr_ - cbg * cb_;   \
        int y0_ = ((int)(Y0) - yo) * ky, y1_ = ((int)(Y1) - yo) * ky;         \
        y[2 * (i)] = clamp8_q14(y0_);                                         \
        y[2 * (i) + 1] = clamp8_q14(y1_);                                     \
        r[2 * (i)] = clamp8_q14(y0_ + dr_);                                   \
        r[2 * (i) + 1] = clamp8_q14(y1_ + dr_);                               \
        g[2 * (i)] = clamp8_q14(y0_ + dg_);                                   \
        g[2 * (i) + 1] = clamp8_q14(y1_ + dg_);                               \
        b[2 * (i)] = clamp8_q14(y0_ + db_);                                   \
        b[2 * (i) + 1] = clamp8_q14(y1_ + db_);                               \
    } while (0)

KBODY void unpack_yuyv_k(const uint8_t *restrict p, int w, const yuv_coef *c,
                            uint8_t *restrict r, uint8_t *restrict g, uint8_t *restrict b,
                            uint8_t *restrict y)
{
    const int ky = c->ky, yo = c->y0, crr = c->cr_r, cbb = c->cb_b, crg = c->cr_g, cbg = c->cb_g;
    for (int i = 0; i < w / 2; i++)
        YUV_PAIR(p[4 * i], p[4 * i + 2], p[4 * i + 1], p[4 * i + 3], i);
}

KBODY void unpack_nv12_k(const uint8_t *restrict py, const uint8_t *restrict pc, int w,
                            const yuv_coef *c, uint8_t *restrict r, uint8_t *restrict g,
                            uint8_t *restrict b, uint8_t *restrict y)
{
    const int ky = c->ky, yo = c->y0, crr = c->cr_r, cbb = c->cb_b, crg = c->cr_g, cbg = c->cb_g;
    for (int i = 0; i < w / 2; i++)
        YUV_PAIR(py[2 * i], py[2 * i + 1], pc[2 * i], pc[2 * i + 1], i);
}

#if TONE_AVX2
/* One Y'CbCr pixel (x of the row, its chroma pair x / 2) as the portable
 * unpackers compute it: the same integers as YUV_PAIR. */
static inline __attribute__((always_inline)) void
yuv_px(const uint8_t *restrict p, const uint8_t *restrict pc, int nv12, const yuv_coef *c, int x,
       int *R, int *G, int *B, int *Y)
{
    int Yv = nv12 ? p[x] : p[2 * x];
    int cb = (nv12 ? pc[2 * (x / 2)] : p[4 * (x / 2) + 1]) - 128;
    int cr = (nv12 ? pc[2 * (x / 2) + 1] : p[4 * (x / 2) + 3]) - 128;
    int y_ = (Yv - c->y0) * c->ky;
    *Y = clamp8_q14(y_);
    *R = clamp8_q14(y_ + c->cr_r * cr);
    *G = clamp8_q14(y_ - c->cr_g * cr - c->cb_g * cb);
    *B = clamp8_q14(y_ + c->cb_b * cb);
}

/* YUYV and NV12 rows in one AVX2 loop, 16 pixels a step: R'G'B' and luma
 * (written as planar rows: the exposure samples read them), the colour
 * sums and the block column sums, as the portable unpack, colour and
 * block loops compute them one after the other.  16-bit lanes hold
 * Y' - y0 per pixel and (Cb, Cr) per pixel pair, so multiply-adds give the
 * 32-bit Q14 terms: even and odd pixels' Y' ky by (ky, 0) and (0, ky), the
 * chroma terms by (0, cr_r), (-cb_g, -cr_g) and (cb_b, 0) - cb_b can pass
 * 32767 (limited range), so it is split in two multiply-adds.  The
 * portable clamp8_q14 is an arithmetic shift, an interleave of the even
 * and odd results and a clamp to 0..255. */
__attribute__((target("avx2"))) static inline __attribute__((always_inline)) __m256i
q14_pair(__m256i e, __m256i o)
{
    e = _mm256_srai_epi32(e, 14);
    o = _mm256_slli_epi32(_mm256_srai_epi32(o, 14), 16);
    __m256i v = _mm256_blend_epi16(e, o, 0xAA);
    return _mm256_min_epi16(_mm256_max_epi16(v, _mm256_setzero_si256()), _mm256_set1_epi16(255));
}

/* The low 16 bytes of x's 16-bit lanes, saturated to bytes, in order. */
__attribute__((target("avx2"))) static inline __attribute__((always_inline)) void
store_bytes16(uint8_t *dst, __m256i x)
{
    __m256i b = _mm256_permute4x64_epi64(_mm256_packus_epi16(x, x), 0xD8);
    _mm_storeu_si128((__m128i *)dst, _mm256_castsi256_si128(b));
}

__attribute__((target("avx2"))) static inline __attribute__((always_inline)) void
yuv_avx2(const uint8_t *restrict p, const uint8_t *restrict pc, int nv12, const yuv_coef *c,
         int x0, int x1, uint8_t *restrict r, uint8_t *restrict g, uint8_t *restrict b,
         uint8_t *restrict y, uint16_t *restrict ar, uint16_t *restrict ag, uint16_t *restrict ab,
         uint16_t *restrict ay, int first, int acc, colour_sums *cs)
{
    const int cbb_a = c->cb_b < 32767 ? c->cb_b : 32767, cbb_b = c->cb_b - cbb_a;
    const __m256i w_ye = _mm256_set1_epi32(c->ky), w_yo = _mm256_set1_epi32(c->ky << 16);
    const __m256i w_r = _mm256_set1_epi32((int)((uint32_t)c->cr_r << 16));
    const __m256i w_g = _mm256_set1_epi32((int)((uint32_t)(-c->cr_g) << 16 | (uint16_t)(-c->cb_g)));
    const __m256i w_ba = _mm256_set1_epi32(cbb_a), w_bb = _mm256_set1_epi32(cbb_b);
    const __m256i yo = _mm256_set1_epi16((short)c->y0), c128 = _mm256_set1_epi16(128);
    const __m256i round = _mm256_set1_epi32(8192), m00ff = _mm256_set1_epi16(255);
    colour_vec cv = { _mm256_setzero_si256(), _mm256_setzero_si256(), _mm256_setzero_si256(),
                      _mm256_setzero_si256() };
    int32_t tsrg = 0, tsyb = 0, tqrg = 0, tqyb = 0;
    int x = x0;
#define YUV_TAIL_PX(X)                                                          \
    do {                                                                      \
        int R_, G_, B_, Y_;                                                   \
        yuv_px(p, pc, nv12, c, (X), &R_, &G_, &B_, &Y_);                      \
        r[X] = (uint8_t)R_;                                                   \
        g[X] = (uint8_t)G_;                                                   \
        b[X] = (uint8_t)B_;                                                   \
        y[X] = (uint8_t)Y_;                                                   \
        int rg_ = R_ - G_, yb_ = R_ + G_ - 2 * B_;                            \
        tsrg += rg_;                                                          \
        tsyb += yb_;                                                          \
        tqrg += rg_ * rg_;                                                    \
        tqyb += yb_ * yb_;                                                    \
        if (acc) {                                                            \
            ar[X] = (uint16_t)(first ? R_ : ar[X] + R_);                      \
            ag[X] = (uint16_t)(first ? G_ : ag[X] + G_);                      \
            ab[X] = (uint16_t)(first ? B_ : ab[X] + B_);                      \
            ay[X] = (uint16_t)(first ? Y_ : ay[X] + Y_);                      \
        }                                                                     \
    } while (0)
    if (x & 1) { /* a span may start inside a chroma pair */
        YUV_TAIL_PX(x);
        x++;
    }
    for (; x + 16 <= x1; x += 16) {
        __m256i Y16, C16;
        if (nv12) {
            Y16 = _mm256_cvtepu8_epi16(_mm_loadu_si128((const __m128i *)(p + x)));
            C16 = _mm256_cvtepu8_epi16(_mm_loadu_si128((const __m128i *)(pc + x)));
        } else {
            __m256i v = _mm256_loadu_si256((const __m256i *)(p + 2 * (size_t)x));
            Y16 = _mm256_and_si256(v, m00ff);
            C16 = _mm256_srli_epi16(v, 8);
        }
        Y16 = _mm256_sub_epi16(Y16, yo);
        C16 = _mm256_sub_epi16(C16, c128); /* (Cb, Cr) of each pixel pair */
        __m256i ye = _mm256_add_epi32(_mm256_madd_epi16(Y16, w_ye), round);
        __m256i yod = _mm256_add_epi32(_mm256_madd_epi16(Y16, w_yo), round);
        __m256i dr = _mm256_madd_epi16(C16, w_r), dg = _mm256_madd_epi16(C16, w_g);
        __m256i db = _mm256_add_epi32(_mm256_madd_epi16(C16, w_ba), _mm256_madd_epi16(C16, w_bb));
        __m256i Y = q14_pair(ye, yod);
        __m256i R = q14_pair(_mm256_add_epi32(ye, dr), _mm256_add_epi32(yod, dr));
        __m256i G = q14_pair(_mm256_add_epi32(ye, dg), _mm256_add_epi32(yod, dg));
        __m256i B = q14_pair(_mm256_add_epi32(ye, db), _mm256_add_epi32(yod, db));
        store_bytes16(y + x, Y);
        store_bytes16(r + x, R);
        store_bytes16(g + x, G);
        store_bytes16(b + x, B);
        colour_acc16(&cv, R, G, B, Y, x, ar, ag, ab, ay, first, acc);
    }
    for (; x < x1; x++)
        YUV_TAIL_PX(x);
#undef YUV_TAIL_PX
    cs->srg += tsrg;
    cs->syb += tsyb;
    cs->qrg += tqrg;
    cs->qyb += tqyb;
    colour_reduce(cv, cs);
}

__attribute__((target("avx2"))) static void
yuv_span_avx2(const uint8_t *restrict p, const uint8_t *restrict pc, int nv12, const yuv_coef *c,
              int x0, int x1, uint8_t *restrict r, uint8_t *restrict g, uint8_t *restrict b,
              uint8_t *restrict y, uint16_t *restrict ar, uint16_t *restrict ag,
              uint16_t *restrict ab, uint16_t *restrict ay, int first, int acc, colour_sums *cs)
{
    if (nv12)
        yuv_avx2(p, pc, 1, c, x0, x1, r, g, b, y, ar, ag, ab, ay, first, acc, cs);
    else
        yuv_avx2(p, pc, 0, c, x0, x1, r, g, b, y, ar, ag, ab, ay, first, acc, cs);
}
#endif

/* ---- per-row statistics ------------------------------------------------ */

typedef struct tone_sums {
    uint64_t lin;              /* linear luminance, 2^24 units            */
    uint64_t nlin;             /* pixels summed into lin                  */
    uint64_t clip_hi, clip_lo; /* pixels with luma >= / <= the clip codes */
    int64_t s_rg, s_yb;        /* sums of R-G and R+G-2B                  */
    uint64_t q_rg, q_yb;       /* sums of their squares                   */
    int64_t s_l;               /* sum of L                                */
    uint64_t q_l;              /* sum of L^2                              */
} tone_sums;

/* The histogram and the exposure read samples, not every pixel: one
 * increment a pixel (a load and a store into a table) made the histogram
 * the most expensive step of the pass, and three sRGB table loads a pixel
 * the exposure sum.  Both are statistics of the whole picture: the
 * histogram is drawn 256 bins wide and compared between frames as
 * fractions, the exposure meter shows tenths of a stop.  Clip fractions,
 * which a photographer reads at the level of single pixels, stay exact
 * (clip_row_k below counts every pixel).
 *
 * The samples are single full-resolution pixels (box means would bias the
 * exposure through the sRGB curve, and would hide clipped pixels in the
 * histogram), every row contributes, and the phase of the samples in a row
 * follows the bit-reversed row number, an ordered-dither pattern: the
 * histogram takes x = PH4[y mod 4] (mod 4), a quarter of the pixels; the
 * exposure x = PH16[y mod 16] (mod 16), a sixteenth (130 000 samples at
 * 1080p, 19 000 at 640x480).  So every column is sampled equally often,
 * and one-pixel stripes in either direction and checkerboards are sampled
 * in their true proportions; a uniform frame gives the exact value. */
static const uint8_t PH4[4] = { 0, 2, 1, 3 };
static const uint8_t PH16[16] = { 0, 8, 4, 12, 2, 10, 6, 14, 1, 9, 5, 13, 3, 11, 7, 15 };

/* A quarter of the row into the histogram; eight interleaved tables so a
 * run of one value does not serialise on store-to-load forwarding. */
SCALAR static void hist_row(coach_tone *t, const uint8_t *restrict y, int w, int row)
{
    uint32_t(*H)[256] = t->hist8;
    int x = PH4[row & 3];
    for (; x + 28 < w; x += 32) {
        H[0][y[x]]++;
        H[1][y[x + 4]]++;
        H[2][y[x + 8]]++;
        H[3][y[x + 12]]++;
        H[4][y[x + 16]]++;
        H[5][y[x + 20]]++;
        H[6][y[x + 24]]++;
        H[7][y[x + 28]]++;
    }
    for (; x < w; x += 4)
        H[0][y[x]]++;
}

/* Exposure samples of a planar row (GREY: the luma row itself). */
SCALAR static void lin_row(const coach_tone *t, const uint8_t *restrict r,
                           const uint8_t *restrict g, const uint8_t *restrict b, int w, int grey,
                           int row, tone_sums *s)
{
    uint64_t acc = 0, n = 0;
    int x = PH16[row & 15];
    if (grey) {
        for (; x < w; x += 16, n++)
            acc += t->lin_grey[r[x]];
    } else {
        for (; x < w; x += 16, n++)
            acc += (uint64_t)t->lin[0][r[x]] + t->lin[1][g[x]] + t->lin[2][b[x]];
    }
    s->lin += acc;
    s->nlin += n;
}

/* The same samples of a packed row (an XRGB8888 pixel read as one word). */
SCALAR static void lin_packed(const coach_tone *t, const uint8_t *restrict p, int pk, int w,
                              int row, tone_sums *s)
{
    uint64_t acc = 0, n = 0;
    for (int x = PH16[row & 15]; x < w; x += 16, n++) {
        int R, G, B;
        load_px(p, pk, (size_t)x, &R, &G, &B);
        acc += (uint64_t)t->lin[0][R] + t->lin[1][G] + t->lin[2][B];
    }
    s->lin += acc;
    s->nlin += n;
}

/* Clipped pixels of a luma row, every one of them (vectorised compares). */
KBODY void clip_row_k(const uint8_t *restrict y, int w, tone_sums *s)
{
    uint32_t hi = 0, lo = 0;
    for (int x = 0; x < w; x++) {
        hi += y[x] >= COACH_CLIP_HIGH;
        lo += y[x] <= COACH_CLIP_LOW;
    }
    s->clip_hi += hi;
    s->clip_lo += lo;
}

KBODY void colour_row_k(const uint8_t *restrict r, const uint8_t *restrict g,
                           const uint8_t *restrict b, int w, tone_sums *s)
{
    /* |R+G-2B| <= 510: chunks of 4096 keep the int32 square sums exact
     * (4096 * 510^2 < 2^31); int16 operands let the squares use the
     * 16-bit multiply-add instructions. */
    for (int x0 = 0; x0 < w; x0 += 4096) {
        int x1 = x0 + 4096 < w ? x0 + 4096 : w;
        int32_t srg = 0, syb = 0, qrg = 0, qyb = 0;
        for (int x = x0; x < x1; x++) {
            int16_t rg = (int16_t)(r[x] - g[x]);
            int16_t yb = (int16_t)(r[x] + g[x] - 2 * b[x]);
            srg += rg;
            syb += yb;
            qrg += rg * rg;
            qyb += yb * yb;
        }
        s->s_rg += srg;
        s->s_yb += syb;
        s->q_rg += (uint32_t)qrg;
        s->q_yb += (uint32_t)qyb;
    }
}

/* First row of a block assigns, later rows add: no clearing pass. */
KBODY void acc_colour_k(uint16_t *restrict acc, const uint8_t *restrict r,
                       const uint8_t *restrict g, const uint8_t *restrict b,
                       const uint8_t *restrict y, int n, int W, int first)
{
    uint16_t *ar = acc, *ag = acc + W, *ab = acc + 2 * W, *ay = acc + 3 * W;
    if (first) {
        for (int x = 0; x < n; x++) {
            ar[x] = r[x];
            ag[x] = g[x];
            ab[x] = b[x];
            ay[x] = y[x];
        }
    } else {
        for (int x = 0; x < n; x++) {
            ar[x] = (uint16_t)(ar[x] + r[x]);
            ag[x] = (uint16_t)(ag[x] + g[x]);
            ab[x] = (uint16_t)(ab[x] + b[x]);
            ay[x] = (uint16_t)(ay[x] + y[x]);
        }
    }
}

/* Horizontal half of the box filter, once per block row: sum `scale`
 * neighbouring column sums.  The common scales get a constant inner loop
 * the compiler unrolls; the flush then costs little next to the row work. */
#define FLUSH_BODY(T, ACC_T, S)                                                 \
    for (int ax = 0; ax < aw; ax++) {                                         \
        ACC_T s = 0;                                                          \
        const T *a = acc + (size_t)ax * (S);                                  \
        for (int i = 0; i < (S); i++)                                         \
            s += a[i];                                                        \
        tmp[ax] = s;                                                          \
    }

/* Integer sums first, then one vectorised int -> float scaling pass: a
 * conversion per output in the summing loop cost more than the sums. */
#define FLUSH_FN(NAME, T, ACC_T)                                                \
    static void NAME(const T *restrict acc, int scale, int aw, float k,       \
                     ACC_T *restrict tmp, float *restrict out)                \
    {                                                                         \
        switch (scale) {                                                      \
        case 1: FLUSH_BODY(T, ACC_T, 1) break;                                \
        case 2: FLUSH_BODY(T, ACC_T, 2) break;                                \
        case 3: FLUSH_BODY(T, ACC_T, 3) break;                                \
        case 4: FLUSH_BODY(T, ACC_T, 4) break;                                \
        case 6: FLUSH_BODY(T, ACC_T, 6) break;                                \
        case 8: FLUSH_BODY(T, ACC_T, 8) break;                                \
        case 12: FLUSH_BODY(T, ACC_T, 12) break;                              \
        default: FLUSH_BODY(T, ACC_T, scale) break;                           \
        }                                                                     \
        for (int ax = 0; ax < aw; ax++)                                       \
            out[ax] = (float)tmp[ax] * k;                                     \
    }

/* Block sums: colour and L fit int32; L^2 needs uint32 (up to
 * (16384 / 320)^2 pixels of at most 1020^2 = 2.7e9). */
FLUSH_FN(flush_u16, uint16_t, int32_t)
FLUSH_FN(flush_i32, int32_t, int32_t)
FLUSH_FN(flush_u32, uint32_t, uint32_t)
#if TONE_AVX2
/* Sums of adjacent int32 pairs of a:b, in order. */
__attribute__((target("avx2"))) static inline __m256i pairs_i32(__m256i a, __m256i b)
{
    return _mm256_permute4x64_epi64(_mm256_hadd_epi32(a, b), 0xD8);
}

/* Block k of width 6 from the pair sums P0..P23 in pa, pb, pc:
 * P[3k] + P[3k+1] + P[3k+2], gathered by blends and one permute each. */
__attribute__((target("avx2"))) static inline __m256i triples_i32(__m256i pa, __m256i pb,
                                                                 __m256i pc)
{
    const __m256i i0 = _mm256_setr_epi32(0, 3, 6, 1, 4, 7, 2, 5);
    const __m256i i1 = _mm256_setr_epi32(1, 4, 7, 2, 5, 0, 3, 6);
    const __m256i i2 = _mm256_setr_epi32(2, 5, 0, 3, 6, 1, 4, 7);
    __m256i x0 = _mm256_blend_epi32(_mm256_blend_epi32(pa, pb, 0x92), pc, 0x24);
    __m256i x1 = _mm256_blend_epi32(_mm256_blend_epi32(pa, pb, 0x24), pc, 0x49);
    __m256i x2 = _mm256_blend_epi32(_mm256_blend_epi32(pa, pb, 0x49), pc, 0x92);
    x0 = _mm256_permutevar8x32_epi32(x0, i0);
    x1 = _mm256_permutevar8x32_epi32(x1, i1);
    x2 = _mm256_permutevar8x32_epi32(x2, i2);
    return _mm256_add_epi32(_mm256_add_epi32(x0, x1), x2);
}

/* The scalar tail of the flushes below. */
#define FLUSH_TAIL()                                                            \
    for (; ax < aw; ax++) {                                                   \
        int32_t sum = 0;                                                      \
        for (int i = 0; i < scale; i++)                                       \
            sum += acc[(size_t)ax * scale + i];                               \
        out[ax] = (float)sum * k;                                             \
    }

/* The same for the Laplacian planes: n int32 entries a block (n = 2, 3,
 * 4 or 6: per-column sums at block widths 4 and 6, or sums of column pairs
 * at 4 and 6, and at 8 and 12 for 2560 and 3840 wide frames).  A block of
 * L^2 is at most 144 * 1020^2, far inside int32. */
__attribute__((target("avx2"))) static int flush_i32_avx2(const int32_t *restrict acc, int n,
                                                         int aw, float k, float *restrict out)
{
    if (n != 2 && n != 3 && n != 4 && n != 6)
        return 0;
    const int scale = n; /* for FLUSH_TAIL */
    const __m256 kk = _mm256_set1_ps(k);
    int ax = 0;
    for (; ax + 8 <= aw; ax += 8) {
        const __m256i *a = (const __m256i *)(acc + (size_t)ax * n);
        __m256i a0 = _mm256_loadu_si256(a), a1 = _mm256_loadu_si256(a + 1), q;
        if (n == 2) {
            q = pairs_i32(a0, a1);
        } else if (n == 3) {
            q = triples_i32(a0, a1, _mm256_loadu_si256(a + 2));
        } else {
            __m256i pa = pairs_i32(a0, a1);
            __m256i pb = pairs_i32(_mm256_loadu_si256(a + 2), _mm256_loadu_si256(a + 3));
            if (n == 4)
                q = pairs_i32(pa, pb);
            else
                q = triples_i32(pa, pb,
                                pairs_i32(_mm256_loadu_si256(a + 4), _mm256_loadu_si256(a + 5)));
        }
        _mm256_storeu_ps(out + ax, _mm256_mul_ps(_mm256_cvtepi32_ps(q), kk));
    }
    FLUSH_TAIL()
    return 1;
}

/* The flush of a u16 plane for the block widths of 720p (4) and 1080p (6)
 * by hand: pair sums with a multiply-add, then the pairs of each block
 * gathered by blends and one permute.  Integer sums, so the output is
 * identical to flush_u16.  Returns 0 for other widths. */
__attribute__((target("avx2"))) static int flush_u16_avx2(const uint16_t *restrict acc, int scale,
                                                         int aw, float k, float *restrict out)
{
    if (scale != 4 && scale != 6)
        return 0;
    const __m256i one = _mm256_set1_epi16(1);
    const __m256 kk = _mm256_set1_ps(k);
    int ax = 0;
    for (; ax + 8 <= aw; ax += 8) {
        /* pair sums by multiply-add (P0..P15, or P0..P23), then blocks */
        const __m256i *a = (const __m256i *)(acc + (size_t)ax * scale);
        __m256i pa = _mm256_madd_epi16(_mm256_loadu_si256(a), one);
        __m256i pb = _mm256_madd_epi16(_mm256_loadu_si256(a + 1), one);
        __m256i q = scale == 4 ? pairs_i32(pa, pb)
                               : triples_i32(pa, pb, _mm256_madd_epi16(_mm256_loadu_si256(a + 2), one));
        _mm256_storeu_ps(out + ax, _mm256_mul_ps(_mm256_cvtepi32_ps(q), kk));
    }
    FLUSH_TAIL()
    return 1;
}
#endif


/* Laplacian [0 1 0; 1 -4 1; 0 1 0] of row c with the rows above (u) and
 * below (d).  Ring rows carry their reflect-101 neighbours c[-1] = c[1] and
 * c[w] = c[w - 2] (see pad_row), so the ends need no case of their own. */
KBODY void lap_row_k(const uint8_t *restrict u, const uint8_t *restrict c,
                    const uint8_t *restrict d, int w, int16_t *restrict L)
{
    for (int x = 0; x < w; x++)
        L[x] = (int16_t)(u[x] + d[x] + c[x - 1] + c[x + 1] - 4 * c[x]);
}

/* Sums of L and L^2 over the row and, for rows inside the blocks, the
 * block column sums (mode 1: first row of a block, 2: later rows), in one
 * read of L. */
KBODY void lap_sums_acc_k(const int16_t *restrict L, int w, int n_acc, int mode,
                             int32_t *restrict al, int32_t *restrict aq, tone_sums *s)
{
    for (int x0 = 0; x0 < w; x0 += LAP_CHUNK) {
        int x1 = x0 + LAP_CHUNK < w ? x0 + LAP_CHUNK : w;
        int a1 = mode ? (x1 < n_acc ? x1 : n_acc) : x0;
        if (a1 < x0)
            a1 = x0;
        int32_t sl = 0, ql = 0;
        int x = x0;
        if (mode == 1) {
            for (; x < a1; x++) {
                int32_t l = L[x], q = l * l;
                sl += l;
                ql += q;
                al[x] = l;
                aq[x] = q;
            }
        } else if (mode == 2) {
            for (; x < a1; x++) {
                int32_t l = L[x], q = l * l;
                sl += l;
                ql += q;
                al[x] += l;
                aq[x] += q;
            }
        }
        for (; x < x1; x++) {
            sl += L[x];
            ql += (int32_t)L[x] * L[x];
        }
        s->s_l += sl;
        s->q_l += (uint32_t)ql;
    }
}

#if TONE_AVX2
/* Laplacian row, its sums and the block sums in one AVX2 pass, 16 pixels a
 * step, for even block widths.  One multiply-add gives both the sums of
 * adjacent pairs of L and of L^2 as int32: the row totals need them anyway,
 * and accumulated per column pair (al, aq hold w / 2 entries; mode 1: first
 * row of a block, 2: later rows) they halve the block-sum loads and stores
 * of a per-column layout, with no widening.  A block of an even width is
 * whole pairs, so its sums are the same integers as the portable loops'. */
__attribute__((target("avx2"))) static void
lap_pairs_avx2(const uint8_t *restrict u, const uint8_t *restrict c, const uint8_t *restrict d,
               int w, int n_acc, int mode, int32_t *restrict al, int32_t *restrict aq,
               tone_sums *s)
{
    const __m256i one = _mm256_set1_epi16(1);
    __m256i sl = _mm256_setzero_si256(), ql = sl;
    const int nv = mode ? n_acc : 0; /* columns that go into blocks (even) */
    /* per lane at most 2 * 1020^2 per step and w / 16 <= 1024 steps:
     * ql fits uint32 */
    int x = 0;
    for (; x + 16 <= w; x += 16) {
        __m256i vu = _mm256_cvtepu8_epi16(_mm_loadu_si128((const __m128i *)(u + x)));
        __m256i vd = _mm256_cvtepu8_epi16(_mm_loadu_si128((const __m128i *)(d + x)));
        __m256i vl = _mm256_cvtepu8_epi16(_mm_loadu_si128((const __m128i *)(c + x - 1)));
        __m256i vr = _mm256_cvtepu8_epi16(_mm_loadu_si128((const __m128i *)(c + x + 1)));
        __m256i vc = _mm256_cvtepu8_epi16(_mm_loadu_si128((const __m128i *)(c + x)));
        __m256i lv = _mm256_sub_epi16(_mm256_add_epi16(_mm256_add_epi16(vu, vd),
                                                       _mm256_add_epi16(vl, vr)),
                                      _mm256_slli_epi16(vc, 2));
        __m256i pl = _mm256_madd_epi16(lv, one), pq = _mm256_madd_epi16(lv, lv);
        sl = _mm256_add_epi32(sl, pl);
        ql = _mm256_add_epi32(ql, pq);
        if (x + 16 <= nv) {
            __m256i *pa = (__m256i *)(al + x / 2), *pp = (__m256i *)(aq + x / 2);
            if (mode == 2) {
                pl = _mm256_add_epi32(pl, _mm256_loadu_si256(pa));
                pq = _mm256_add_epi32(pq, _mm256_loadu_si256(pp));
            }
            _mm256_storeu_si256(pa, pl);
            _mm256_storeu_si256(pp, pq);
        } else if (x < nv) { /* the blocks end inside this step */
            int32_t tl[8], tq[8];
            _mm256_storeu_si256((__m256i *)tl, pl);
            _mm256_storeu_si256((__m256i *)tq, pq);
            for (int i = 0; i < (nv - x) / 2; i++) {
                al[x / 2 + i] = mode == 1 ? tl[i] : al[x / 2 + i] + tl[i];
                aq[x / 2 + i] = mode == 1 ? tq[i] : aq[x / 2 + i] + tq[i];
            }
        }
    }
    int32_t lane[8];
    _mm256_storeu_si256((__m256i *)lane, sl);
    for (int i = 0; i < 8; i++)
        s->s_l += lane[i];
    _mm256_storeu_si256((__m256i *)lane, ql);
    for (int i = 0; i < 8; i++)
        s->q_l += (uint32_t)lane[i];
    for (; x < w; x++) { /* the last few pixels */
        int32_t l = u[x] + d[x] + c[x - 1] + c[x + 1] - 4 * c[x];
        s->s_l += l;
        s->q_l += (uint32_t)(l * l);
        if (x < nv) {
            int first = mode == 1 && x % 2 == 0;
            al[x / 2] = first ? l : al[x / 2] + l;
            aq[x / 2] = first ? l * l : aq[x / 2] + l * l;
        }
    }
}
#endif

#if TONE_AVX2
/* Clipped pixels of a luma row, 32 a step: unsigned compares as
 * max(v, 250) == v and min(v, 5) == v, counted in byte lanes that are
 * emptied into 64-bit sums (psadbw) before they can wrap.  The compiler's
 * version of clip_row_k widens every byte to 32 bits and costs four times
 * as many instructions. */
__attribute__((target("avx2"))) static void clip_avx2(const uint8_t *restrict y, int w,
                                                    tone_sums *s)
{
    const __m256i th = _mm256_set1_epi8((char)COACH_CLIP_HIGH);
    const __m256i tl = _mm256_set1_epi8((char)COACH_CLIP_LOW);
    const __m256i zero = _mm256_setzero_si256();
    __m256i sh = zero, sl = zero;
    int x = 0;
    while (x + 32 <= w) {
        int n = (w - x) / 32;
        n = n < 255 ? n : 255; /* a byte lane counts at most 255 */
        __m256i ch = zero, cl = zero;
        for (int i = 0; i < n; i++, x += 32) {
            __m256i v = _mm256_loadu_si256((const __m256i *)(y + x));
            ch = _mm256_sub_epi8(ch, _mm256_cmpeq_epi8(_mm256_max_epu8(v, th), v));
            cl = _mm256_sub_epi8(cl, _mm256_cmpeq_epi8(_mm256_min_epu8(v, tl), v));
        }
        sh = _mm256_add_epi64(sh, _mm256_sad_epu8(ch, zero));
        sl = _mm256_add_epi64(sl, _mm256_sad_epu8(cl, zero));
    }
    uint64_t lh[4], ll[4];
    _mm256_storeu_si256((__m256i *)lh, sh);
    _mm256_storeu_si256((__m256i *)ll, sl);
    s->clip_hi += lh[0] + lh[1] + lh[2] + lh[3];
    s->clip_lo += ll[0] + ll[1] + ll[2] + ll[3];
    if (x < w)
        clip_row_k(y + x, w - x, s);
}
#endif

/* The kernels' two instances and the table the analyzer points at. */
typedef void (*packed_fn)(const uint8_t *, int, int, uint8_t *, uint16_t *, uint16_t *,
                          uint16_t *, uint16_t *, int, int, colour_sums *);
struct tone_kernels {
    packed_fn packed[3]; /* by PK_ layout */
    void (*yuyv)(const uint8_t *, int, const yuv_coef *, uint8_t *, uint8_t *, uint8_t *,
                 uint8_t *);
    void (*nv12)(const uint8_t *, const uint8_t *, int, const yuv_coef *, uint8_t *, uint8_t *,
                 uint8_t *, uint8_t *);
    void (*colour)(const uint8_t *, const uint8_t *, const uint8_t *, int, tone_sums *);
    void (*acc)(uint16_t *, const uint8_t *, const uint8_t *, const uint8_t *, const uint8_t *,
                int, int, int);
    void (*lap)(const uint8_t *, const uint8_t *, const uint8_t *, int, int16_t *);
    void (*lap_sums)(const int16_t *, int, int, int, int32_t *, int32_t *, tone_sums *);
    void (*clip)(const uint8_t *, int, tone_sums *);
};

#define PACKED_K(NAME, PK, ATTR)                                                                \
    ATTR static void NAME(const uint8_t *restrict p, int x0, int x1, uint8_t *restrict y,       \
                          uint16_t *restrict ar, uint16_t *restrict ag, uint16_t *restrict ab,  \
                          uint16_t *restrict ay, int first, int acc, colour_sums *cs)           \
    {                                                                                         \
        packed_fused_k(p, PK, x0, x1, y, ar, ag, ab, ay, first, acc, cs);                      \
    }

#define TONE_KERNEL_SET(SUF, ATTR)                                                              \
    PACKED_K(kxrgb_##SUF, PK_XRGB, ATTR)                                                      \
    PACKED_K(krgb24_##SUF, PK_RGB24, ATTR)                                                    \
    PACKED_K(kbgr24_##SUF, PK_BGR24, ATTR)                                                    \
    ATTR static void kyuyv_##SUF(const uint8_t *restrict p, int w, const yuv_coef *c,          \
                                uint8_t *restrict r, uint8_t *restrict g, uint8_t *restrict b, \
                                uint8_t *restrict y)                                          \
    {                                                                                         \
        unpack_yuyv_k(p, w, c, r, g, b, y);                                                   \
    }                                                                                         \
    ATTR static void knv12_##SUF(const uint8_t *restrict py, const uint8_t *restrict pc, int w, \
                                const yuv_coef *c, uint8_t *restrict r, uint8_t *restrict g,  \
                                uint8_t *restrict b, uint8_t *restrict y)                     \
    {                                                                                         \
        unpack_nv12_k(py, pc, w, c, r, g, b, y);                                              \
    }                                                                                         \
    ATTR static void kcolour_##SUF(const uint8_t *restrict r, const uint8_t *restrict g,       \
                                  const uint8_t *restrict b, int w, tone_sums *s)             \
    {                                                                                         \
        colour_row_k(r, g, b, w, s);                                                          \
    }                                                                                         \
    ATTR static void kacc_##SUF(uint16_t *restrict acc, const uint8_t *restrict r,             \
                               const uint8_t *restrict g, const uint8_t *restrict b,          \
                               const uint8_t *restrict y, int n, int W, int first)            \
    {                                                                                         \
        acc_colour_k(acc, r, g, b, y, n, W, first);                                           \
    }                                                                                         \
    ATTR static void klap_##SUF(const uint8_t *restrict u, const uint8_t *restrict c,          \
                               const uint8_t *restrict d, int w, int16_t *restrict L)         \
    {                                                                                         \
        lap_row_k(u, c, d, w, L);                                                             \
    }                                                                                         \
    ATTR static void klap_sums_##SUF(const int16_t *restrict L, int w, int n_acc, int mode,    \
                                    int32_t *restrict al, int32_t *restrict aq, tone_sums *s) \
    {                                                                                         \
        lap_sums_acc_k(L, w, n_acc, mode, al, aq, s);                                         \
    }                                                                                         \
    ATTR static void kclip_##SUF(const uint8_t *restrict y, int w, tone_sums *s)                \
    {                                                                                         \
        clip_row_k(y, w, s);                                                                  \
    }                                                                                         \
    static const struct tone_kernels kernels_##SUF = {                                        \
        { kxrgb_##SUF, krgb24_##SUF, kbgr24_##SUF }, kyuyv_##SUF,    knv12_##SUF,                   \
        kcolour_##SUF, kacc_##SUF,  klap_##SUF,    klap_sums_##SUF, kclip_##SUF,                 \
    };

TONE_KERNEL_SET(portable, )
#if TONE_AVX2
TONE_KERNEL_SET(avx2, __attribute__((target("avx2"))))
#endif

static const struct tone_kernels *tone_kernels_pick(int simd)
{
#if TONE_AVX2
    if (simd)
        return &kernels_avx2;
#endif
    (void)simd;
    return &kernels_portable;
}

static void packed_span(const coach_tone *t, int pk, const uint8_t *p, int x0, int x1,
                        uint8_t *y, uint16_t *ar, uint16_t *ag, uint16_t *ab, uint16_t *ay,
                        int first, int acc, colour_sums *cs)
{
#if TONE_AVX2
    static const packed_fn simd[3] = { xrgb_avx2, rgb24_avx2, bgr24_avx2 };
    if (t->simd) {
        simd[pk](p, x0, x1, y, ar, ag, ab, ay, first, acc, cs);
        return;
    }
#endif
    t->k->packed[pk](p, x0, x1, y, ar, ag, ab, ay, first, acc, cs);
}

/* ---- the pass ---------------------------------------------------------- */

int coach_tone_check(const coach_frame *f)
{
    if (!f || !f->data || f->w < COACH_MIN_DIM || f->h < COACH_MIN_DIM ||
        f->w > COACH_MAX_DIM || f->h > COACH_MAX_DIM)
        return -EINVAL;
    int bpp = coach_format_bpp(f->format);
    if (bpp == 0 || f->stride < f->w * bpp)
        return -EINVAL;
    if ((f->format == COACH_FMT_YUYV || f->format == COACH_FMT_NV12) && (f->w & 1))
        return -EINVAL;
    if (f->format == COACH_FMT_NV12 && f->stride2 != 0 && f->stride2 < f->w)
        return -EINVAL;
    return 0;
}

int coach_tone_run(coach_tone *t, const coach_frame *f, coach_result *out, coach_aimg *img)
{
    int err = coach_tone_check(f);
    if (err)
        return err;
    const int w = f->w, h = f->h;
    int scale, aw, ah;
    coach_tone_geometry(w, h, &scale, &aw, &ah);
    if ((err = grow_rows(t, w)) || (err = grow_planes(t, (size_t)aw * ah)))
        return err;

    const size_t W = (size_t)t->cap_w + 64, P = (size_t)aw * ah;
    float *pl_y = t->planes, *pl_r = pl_y + P, *pl_g = pl_r + P, *pl_b = pl_g + P;
    float *pl_l = pl_b + P, *pl_q = pl_l + P;
    const int bw = aw * scale, bh = ah * scale; /* part covered by blocks */
    const float kblk = 1.0f / (float)(scale * scale);
    int32_t *tmp = t->tmp;
    const int grey = f->format == COACH_FMT_GREY;
    const yuv_coef yc = yuv_coefs(f->matrix, f->range);
    const uint8_t *plane2 = f->data2 ? f->data2 : f->data + (size_t)f->stride * h;
    const int stride2 = f->stride2 ? f->stride2 : f->stride;

    memset(t->hist8, 0, sizeof(t->hist8));
    tone_sums s = { 0 };
    /* ring rows start 32 bytes in: room for the reflected neighbours */
    uint8_t *ring[3] = { t->ring + 32, t->ring + W + 32, t->ring + 2 * W + 32 };
    /* even block widths take the column-pair Laplacian (AVX2) */
    const int lap_pairs = TONE_AVX2 && t->simd && scale % 2 == 0;
    const int lap_n = lap_pairs ? scale / 2 : scale; /* entries a block */

    for (int y = 0; y <= h; y++) {
        if (y < h) {
            const uint8_t *p = f->data + (size_t)f->stride * y;
            uint8_t *yr = ring[y % 3];
            uint8_t *r = t->r, *g = t->g, *b = t->b;
            const int pk = f->format == COACH_FMT_XRGB8888 ? PK_XRGB
                           : f->format == COACH_FMT_RGB24  ? PK_RGB24
                           : f->format == COACH_FMT_BGR24  ? PK_BGR24
                                                           : -1;
            const int yuv = f->format == COACH_FMT_YUYV || f->format == COACH_FMT_NV12;
            const uint8_t *pc = /* NV12 chroma row */
                f->format == COACH_FMT_NV12 ? plane2 + (size_t)stride2 * (y / 2) : NULL;
            if (pk >= 0 || (TONE_AVX2 && t->simd && yuv)) {
                /* fused fast paths; int32 sums exact over 4096 pixels */
                int acc = y < bh, first = acc && y % scale == 0;
                uint16_t *A = t->acc;
                for (int x0 = 0; x0 < w; x0 += 4096) {
                    int x1 = x0 + 4096 < w ? x0 + 4096 : w;
                    int a1 = acc ? (x1 < bw ? x1 : bw) : x0;
                    colour_sums cs = { 0, 0, 0, 0 };
                    for (int part = 0; part < 2; part++) { /* in the blocks, then not */
                        int xa = part ? (a1 > x0 ? a1 : x0) : x0, xb = part ? x1 : a1;
                        if (xb <= xa)
                            continue;
                        if (pk >= 0)
                            packed_span(t, pk, p, xa, xb, yr, A, A + W, A + 2 * W, A + 3 * W,
                                        first, !part, &cs);
#if TONE_AVX2
                        else
                            yuv_span_avx2(p, pc, f->format == COACH_FMT_NV12, &yc, xa, xb, r, g,
                                          b, yr, A, A + W, A + 2 * W, A + 3 * W, first, !part,
                                          &cs);
#endif
                    }
                    s.s_rg += cs.srg;
                    s.s_yb += cs.syb;
                    s.q_rg += (uint32_t)cs.qrg;
                    s.q_yb += (uint32_t)cs.qyb;
                }
                if (pk >= 0)
                    lin_packed(t, p, pk, w, y, &s);
                else
                    lin_row(t, r, g, b, w, 0, y, &s);
            } else {
                switch (f->format) {
                case COACH_FMT_YUYV: t->k->yuyv(p, w, &yc, r, g, b, yr); break;
                case COACH_FMT_NV12: t->k->nv12(p, pc, w, &yc, r, g, b, yr); break;
                default: /* GREY: the luma is the picture (full range, as V4L2 GREY) */
                    memcpy(yr, p, (size_t)w);
                    r = g = b = yr;
                    break;
                }
                lin_row(t, r, g, b, w, grey, y, &s);
                if (!grey)
                    t->k->colour(r, g, b, w, &s);
                if (y < bh)
                    t->k->acc(t->acc, r, g, b, yr, bw, (int)W, y % scale == 0);
            }
            /* reflect-101 neighbours for the Laplacian: x = -1 reads x = 1 */
            yr[-1] = yr[1];
            yr[w] = yr[w - 2];
            hist_row(t, yr, w, y);
#if TONE_AVX2
            if (t->simd)
                clip_avx2(yr, w, &s);
            else
#endif
                t->k->clip(yr, w, &s);
            if (y < bh && y % scale == scale - 1) {
                size_t o = (size_t)(y / scale) * aw;
                float *dst[4] = { pl_r + o, pl_g + o, pl_b + o, pl_y + o };
                for (int c = 0; c < 4; c++) {
#if TONE_AVX2
                    if (t->simd && flush_u16_avx2(t->acc + c * W, scale, aw, kblk, dst[c]))
                        continue;
#endif
                    flush_u16(t->acc + c * W, scale, aw, kblk, tmp, dst[c]);
                }
            }
        }
        if (y == 0)
            continue;
        /* Laplacian of row ly = y - 1, now that the row below is known;
         * reflect-101: row -1 reads row 1, row h reads row h - 2. */
        int ly = y - 1;
        const uint8_t *c = ring[ly % 3];
        const uint8_t *u = ly > 0 ? ring[(ly - 1) % 3] : ring[(ly + 1) % 3];
        const uint8_t *d = ly < h - 1 ? ring[(ly + 1) % 3] : ring[(ly - 1) % 3];
        int mode = ly < bh ? (ly % scale == 0 ? 1 : 2) : 0;
#if TONE_AVX2
        if (lap_pairs) {
            lap_pairs_avx2(u, c, d, w, bw, mode, t->accl, t->accq, &s);
        } else
#endif
        {
            t->k->lap(u, c, d, w, t->lap);
            t->k->lap_sums(t->lap, w, bw, mode, t->accl, t->accq, &s);
        }
        if (ly < bh) {
            int yb = ly % scale;
            if (yb == scale - 1) {
                size_t o = (size_t)(ly / scale) * aw;
                int done = 0;
#if TONE_AVX2
                done = t->simd && flush_i32_avx2(t->accl, lap_n, aw, kblk, pl_l + o) &&
                       flush_i32_avx2(t->accq, lap_n, aw, kblk, pl_q + o);
#endif
                if (!done) {
                    flush_i32(t->accl, lap_n, aw, kblk, tmp, pl_l + o);
                    flush_u32((const uint32_t *)t->accq, lap_n, aw, kblk, (uint32_t *)tmp,
                              pl_q + o);
                }
            }
        }
    }

    const double n = (double)w * h;
    uint32_t total = 0;
    for (int v = 0; v < 256; v++) {
        uint32_t c = 0;
        for (int k = 0; k < 8; k++)
            c += t->hist8[k][v];
        out->hist[v] = c;
        total += c;
    }
    out->hist_total = total;
    out->width = w;
    out->height = h;
    out->clip_high = (double)s.clip_hi / n;
    out->clip_low = (double)s.clip_lo / n;
    out->mean_luma = (double)s.lin / 16777216.0 / (double)s.nlin;
    /* A black frame has no exposure in stops; report a floor (half of
     * code 1, 0.00015 linear = -10.2 EV) rather than -inf. */
    double floor_lin = coach_srgb_decode(0.5 / 255.0);
    out->exposure_ev = log2((out->mean_luma > floor_lin ? out->mean_luma : floor_lin) / 0.18);

    /* Hasler & Suesstrunk 2003, eq. (3): rg = R - G, yb = (R + G)/2 - B,
     * M = sigma_rgyb + 0.3 mu_rgyb, population moments. */
    double mrg = (double)s.s_rg / n, myb = (double)s.s_yb / (2.0 * n);
    double vrg = (double)s.q_rg / n - mrg * mrg;
    double vyb = (double)s.q_yb / (4.0 * n) - myb * myb;
    if (vrg < 0)
        vrg = 0;
    if (vyb < 0)
        vyb = 0;
    out->colourfulness = sqrt(vrg + vyb) + 0.3 * sqrt(mrg * mrg + myb * myb);

    double ml = (double)s.s_l / n;
    double vl = (double)s.q_l / n - ml * ml;
    out->sharpness = vl > 0 ? vl : 0;

    img->w = aw;
    img->h = ah;
    img->scale = scale;
    img->luma = pl_y;
    img->r = pl_r;
    img->g = pl_g;
    img->b = pl_b;
    img->lap = pl_l;
    img->lap_sq = pl_q;
    return 0;
}
