/* cmocka tests for coach/.  Several people add tests here at once: add with
 * small insertions (never rewrite the file), each test next to its section's
 * other tests and in the matching section of main()'s list. */
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <setjmp.h>
#include <cmocka.h>

#include <ctype.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "coach/coach.h"
#include "coach/coach_internal.h"
#include "capture/capture.h"
#include "capture/capture_internal.h"

/* ==== section A ==== */

/* Bytes per pixel of the first plane, from the V4L2 pixel format reference
 * (linux kernel docs, "Packed YUV formats" / "Planar YUV formats" / "RGB
 * formats"): YUYV carries one Y and half a chroma pair per pixel, NV12 and
 * GREY one byte of Y, RGB24/BGR24 three bytes, XRGB8888 four. */
static void test_format_bpp_layouts(void **state)
{
    (void)state;
    assert_int_equal(coach_format_bpp(COACH_FMT_RGB24), 3);
    assert_int_equal(coach_format_bpp(COACH_FMT_BGR24), 3);
    assert_int_equal(coach_format_bpp(COACH_FMT_XRGB8888), 4);
    assert_int_equal(coach_format_bpp(COACH_FMT_YUYV), 2);
    assert_int_equal(coach_format_bpp(COACH_FMT_NV12), 1);
    assert_int_equal(coach_format_bpp(COACH_FMT_GREY), 1);
    assert_int_equal(coach_format_bpp(COACH_FMT_NONE), 0);
}

/* ---- helpers (section A) ---- */

/* sRGB encoding, IEC 61966-2-1:1999 5.2 (forward transfer), for building
 * test frames independently of the library's LUT. */
static double a_srgb_encode(double l)
{
    return l <= 0.0031308 ? 12.92 * l : 1.055 * pow(l, 1 / 2.4) - 0.055;
}

/* An XRGB8888 frame (B,G,R,X bytes) filled by a callback. */
typedef void (*a_pix_fn)(int x, int y, void *ctx, uint8_t rgb[3]);
static coach_frame a_xrgb(int w, int h, a_pix_fn fn, void *ctx)
{
    uint8_t *p = malloc((size_t)w * h * 4);
    assert_non_null(p);
    for (int y = 0; y < h; y++)
        for (int x = 0; x < w; x++) {
            uint8_t c[3];
            fn(x, y, ctx, c);
            uint8_t *q = p + ((size_t)y * w + x) * 4;
            q[0] = c[2];
            q[1] = c[1];
            q[2] = c[0];
            q[3] = 0xff;
        }
    coach_frame f = { .data = p, .w = w, .h = h, .stride = w * 4, .format = COACH_FMT_XRGB8888 };
    return f;
}

static void a_uniform(int x, int y, void *ctx, uint8_t c[3])
{
    (void)x;
    (void)y;
    memcpy(c, ctx, 3);
}

static int a_analyze_once(const coach_frame *f, coach_result *r)
{
    coach_config cfg;
    coach_config_default(&cfg);
    coach_analyzer *a = coach_create(&cfg);
    assert_non_null(a);
    int rc = coach_analyze(a, f, 0.0, r);
    coach_destroy(a);
    return rc;
}

static double a_hist_mean(const coach_result *r)
{
    double s = 0, n = 0;
    for (int v = 0; v < 256; v++) {
        s += (double)v * r->hist[v];
        n += r->hist[v];
    }
    return s / n;
}

/* ---- tone ---- */

/* IEC 61966-2-1:1999 (sRGB), 5.2: 8-bit 118 decodes to 0.1812 and 128 to
 * 0.2159 linear (the standard's formula evaluated; 4 decimals). */
static void test_srgb_decode_iec61966(void **state)
{
    (void)state;
    assert_float_equal(coach_srgb_decode(118 / 255.0), 0.1812, 0.00005);
    assert_float_equal(coach_srgb_decode(128 / 255.0), 0.2159, 0.00005);
    /* linear segment below 0.04045: V / 12.92 (IEC 61966-2-1 5.2) */
    assert_float_equal(coach_srgb_decode(10 / 255.0), 10 / 255.0 / 12.92, 1e-12);
    assert_float_equal(coach_srgb_decode(1.0), 1.0, 1e-12);
}

/* 18 % grey: linear 0.18 encodes to sRGB code 118 (IEC 61966-2-1 5.2), and
 * a frame of code 118 has a relative luminance whose CIE L* is 49.5
 * (CIE 15:2004, L* = 116 (Y/Yn)^(1/3) - 16) and reads 0 EV. */
static void test_grey18_code118_lstar(void **state)
{
    (void)state;
    assert_int_equal((int)lround(255 * a_srgb_encode(0.18)), 118);
    uint8_t c[3] = { 118, 118, 118 };
    coach_frame f = a_xrgb(64, 48, a_uniform, c);
    coach_result r;
    assert_int_equal(a_analyze_once(&f, &r), 0);
    double lstar = 116 * cbrt(r.mean_luma) - 16;
    /* CIE 15: L* = 49.5 for Y = 18 %; code 118 is 0.1812, L* 49.6 */
    assert_float_equal(lstar, 49.5, 0.2);
    assert_float_equal(116 * cbrt(0.18) - 16, 49.5, 0.01);
    assert_float_equal(r.exposure_ev, 0.0, 0.02);
    free((void *)f.data);
}

/* ITU-R BT.709-6 item 3.2: E'Y = 0.2126 E'R + 0.7152 E'G + 0.0722 E'B.
 * Full-scale primaries must land on round(255 * weight). */
static void test_luma_bt709_weights(void **state)
{
    (void)state;
    static const struct { uint8_t rgb[3]; double wgt; } prim[] = {
        { { 255, 0, 0 }, 0.2126 }, { { 0, 255, 0 }, 0.7152 }, { { 0, 0, 255 }, 0.0722 },
        { { 255, 255, 255 }, 1.0 },
    };
    for (size_t i = 0; i < sizeof(prim) / sizeof(prim[0]); i++) {
        coach_frame f = a_xrgb(32, 32, a_uniform, (void *)prim[i].rgb);
        coach_result r;
        assert_int_equal(a_analyze_once(&f, &r), 0);
        int want = (int)lround(255 * prim[i].wgt);
        assert_int_equal(r.hist_total, 32 * 32 / 4); /* a quarter, see tone.c */
        assert_int_equal(r.hist[want], r.hist_total); /* BT.709-6 3.2 */
        free((void *)f.data);
    }
}

/* Builds Y'CbCr from R'G'B' per ITU-R BT.601-7 (Kr 0.299, Kb 0.114) or
 * BT.709-6 (Kr 0.2126, Kb 0.0722), full or limited ("studio") range:
 * Y' = Kr R + (1-Kr-Kb) G + Kb B, Cb = (B - Y') / (2 (1-Kb)),
 * Cr = (R - Y') / (2 (1-Kr)); limited: 16 + 219 Y', 128 + 224 C. */
static void a_rgb_to_ycc(const uint8_t rgb[3], int bt709, int full, uint8_t ycc[3])
{
    double kr = bt709 ? 0.2126 : 0.299, kb = bt709 ? 0.0722 : 0.114;
    double R = rgb[0] / 255.0, G = rgb[1] / 255.0, B = rgb[2] / 255.0;
    double Y = kr * R + (1 - kr - kb) * G + kb * B;
    double cb = (B - Y) / (2 * (1 - kb)), cr = (R - Y) / (2 * (1 - kr));
    double v[3];
    if (full) { /* full range: the extremes of Cb, Cr clip at 255 */
        v[0] = 255 * Y;
        v[1] = 128 + 255 * cb;
        v[2] = 128 + 255 * cr;
    } else {
        v[0] = 16 + 219 * Y;
        v[1] = 128 + 224 * cb;
        v[2] = 128 + 224 * cr;
    }
    for (int i = 0; i < 3; i++)
        ycc[i] = (uint8_t)lround(v[i] < 0 ? 0 : v[i] > 255 ? 255 : v[i]);
}

/* A smooth colour field, constant over 2x2 pixel cells so 4:2:0 chroma
 * subsampling loses nothing. */
static void a_field(int x, int y, void *ctx, uint8_t c[3])
{
    (void)ctx;
    x /= 2;
    y /= 2;
    c[0] = (uint8_t)(30 + (x * 7) % 200);
    c[1] = (uint8_t)(20 + (y * 5) % 210);
    c[2] = (uint8_t)(40 + ((x + y) * 3) % 180);
}

/* YUYV and NV12 frames of the same picture give the same luma histogram and
 * analysis image as the RGB frame, within rounding (BT.709-6 matrix, both
 * ranges; BT.601-7 matrix for the colour planes). */
static void test_luma_yuv_matches_rgb(void **state)
{
    (void)state;
    const int w = 160, h = 120;
    coach_frame rgbf = a_xrgb(w, h, a_field, NULL);
    uint8_t *yuyv = malloc((size_t)w * h * 2), *nv12 = malloc((size_t)w * h * 3 / 2);
    assert_non_null(yuyv);
    assert_non_null(nv12);
    coach_config cfg;
    coach_config_default(&cfg);
    coach_result rr, ry, rn;
    coach_aimg ir, iy, in;
    coach_tone *tr = coach_tone_create(w, h), *ty = coach_tone_create(w, h),
               *tn = coach_tone_create(w, h);
    assert_int_equal(coach_tone_run(tr, &rgbf, &rr, &ir), 0);
    for (int mode = 0; mode < 4; mode++) {
        int bt709 = mode < 2, full = mode & 1;
        for (int y = 0; y < h; y++)
            for (int x = 0; x < w; x++) {
                uint8_t c[3], ycc[3];
                a_field(x, y, NULL, c);
                a_rgb_to_ycc(c, bt709, full, ycc);
                yuyv[(size_t)y * w * 2 + x * 2] = ycc[0];
                yuyv[(size_t)y * w * 2 + (x & ~1) * 2 + 1 + 2 * (x & 1)] = x & 1 ? ycc[2] : ycc[1];
                nv12[(size_t)y * w + x] = ycc[0];
                nv12[(size_t)w * h + (size_t)(y / 2) * w + (x & ~1) + (x & 1)] =
                    x & 1 ? ycc[2] : ycc[1];
            }
        coach_frame fy = { .data = yuyv, .w = w, .h = h, .stride = w * 2, .format = COACH_FMT_YUYV,
                           .matrix = bt709 ? COACH_MATRIX_BT709 : COACH_MATRIX_BT601,
                           .range = full ? COACH_RANGE_FULL : COACH_RANGE_LIMITED };
        coach_frame fn = fy;
        fn.data = nv12;
        fn.stride = w;
        fn.format = COACH_FMT_NV12;
        assert_int_equal(coach_tone_run(ty, &fy, &ry, &iy), 0);
        assert_int_equal(coach_tone_run(tn, &fn, &rn, &in), 0);
        assert_int_equal(iy.w, ir.w);
        assert_int_equal(iy.h, ir.h);
        for (int i = 0; i < ir.w * ir.h; i++) {
            /* colour planes: R'G'B' back from Y'CbCr within rounding of
             * the 8-bit codes (about 1.5 codes in limited range) */
            assert_float_equal(iy.r[i], ir.r[i], 2.0);
            assert_float_equal(iy.g[i], ir.g[i], 2.0);
            assert_float_equal(iy.b[i], ir.b[i], 2.0);
            assert_float_equal(in.r[i], iy.r[i], 0.01); /* same pixels, other layout */
            if (bt709) /* Y' is the BT.709 luma of R'G'B' itself */
                assert_float_equal(iy.luma[i], ir.luma[i], 1.01);
        }
        if (bt709) {
            assert_float_equal(a_hist_mean(&ry), a_hist_mean(&rr), 0.5);
            assert_float_equal(ry.exposure_ev, rr.exposure_ev, 0.02);
        }
        assert_float_equal(rn.sharpness, ry.sharpness, 1e-9);
        assert_float_equal(ry.colourfulness, rr.colourfulness, 0.01 * rr.colourfulness);
    }
    coach_tone_destroy(tr);
    coach_tone_destroy(ty);
    coach_tone_destroy(tn);
    free(yuyv);
    free(nv12);
    free((void *)rgbf.data);
}

/* The Y'CbCr matrices themselves: primaries encoded with the BT.601-7
 * (Kr 0.299, Kb 0.114) and BT.709-6 (Kr 0.2126, Kb 0.0722) equations, in
 * both ranges, decode back to the same primaries, and the luma is Y'
 * (BT.601-7 item 2.5.1: Y' of red is 0.299, of green 0.587, of blue 0.114). */
static void test_luma_bt601_yuv_primaries(void **state)
{
    (void)state;
    static const uint8_t prim[4][3] = { { 255, 0, 0 }, { 0, 255, 0 }, { 0, 0, 255 }, { 200, 120, 40 } };
    static const double kr[2] = { 0.299, 0.2126 }, kb[2] = { 0.114, 0.0722 };
    const int w = 32, h = 16;
    uint8_t *yuyv = malloc((size_t)w * h * 2);
    assert_non_null(yuyv);
    coach_tone *t = coach_tone_create(w, h);
    for (int m = 0; m < 2; m++)
        for (int full = 0; full < 2; full++)
            for (int p = 0; p < 4; p++) {
                uint8_t ycc[3];
                a_rgb_to_ycc(prim[p], m, full, ycc);
                for (int i = 0; i < w * h / 2; i++) {
                    yuyv[4 * i] = yuyv[4 * i + 2] = ycc[0];
                    yuyv[4 * i + 1] = ycc[1];
                    yuyv[4 * i + 3] = ycc[2];
                }
                coach_frame f = { .data = yuyv, .w = w, .h = h, .stride = w * 2,
                                  .format = COACH_FMT_YUYV,
                                  .matrix = m ? COACH_MATRIX_BT709 : COACH_MATRIX_BT601,
                                  .range = full ? COACH_RANGE_FULL : COACH_RANGE_LIMITED };
                coach_result r;
                coach_aimg img;
                assert_int_equal(coach_tone_run(t, &f, &r, &img), 0);
                assert_float_equal(img.r[0], prim[p][0], 1.5);
                assert_float_equal(img.g[0], prim[p][1], 1.5);
                assert_float_equal(img.b[0], prim[p][2], 1.5);
                double y = kr[m] * prim[p][0] + (1 - kr[m] - kb[m]) * prim[p][1] + kb[m] * prim[p][2];
                assert_float_equal(img.luma[0], y, 1.01);
            }
    coach_tone_destroy(t);
    free(yuyv);
}

/* Uniform grey frames at whole stops around middle grey: the grey code is
 * the sRGB encoding (IEC 61966-2-1) of 0.18 * 2^k, and exposure_ev must read
 * k within 0.1 stop (acceptance criterion; EV = log2(mean / 0.18)). */
static void test_exposure_whole_stops(void **state)
{
    (void)state;
    for (int k = -4; k <= 2; k++) {
        int code = (int)lround(255 * a_srgb_encode(0.18 * pow(2, k)));
        uint8_t c[3] = { (uint8_t)code, (uint8_t)code, (uint8_t)code };
        coach_frame f = a_xrgb(96, 64, a_uniform, c);
        coach_result r;
        assert_int_equal(a_analyze_once(&f, &r), 0);
        assert_float_equal(r.exposure_ev, (double)k, 0.1);
        free((void *)f.data);
    }
}

/* Exposure is summed over a sixteenth of the pixels and the histogram
 * counts a quarter (see coach/tone.c); one-pixel stripes in either
 * direction and a checkerboard must still read the mean of the two linear
 * values (IEC 61966-2-1 decoding of codes 30, 220), and the histogram must
 * hold the two codes in equal shares. */
static void a_stripes(int x, int y, void *ctx, uint8_t c[3])
{
    int kind = *(int *)ctx;
    int on = kind == 0 ? x & 1 : kind == 1 ? y & 1 : (x + y) & 1;
    c[0] = c[1] = c[2] = (uint8_t)(on ? 220 : 30);
}

static void test_exposure_stripes_no_alias(void **state)
{
    (void)state;
    double want = 0.5 * (coach_srgb_decode(30 / 255.0) + coach_srgb_decode(220 / 255.0));
    for (int kind = 0; kind < 3; kind++) {
        coach_frame f = a_xrgb(64, 48, a_stripes, &kind);
        coach_result r;
        assert_int_equal(a_analyze_once(&f, &r), 0);
        assert_float_equal(r.mean_luma, want, 0.01 * want);
        assert_int_equal(r.hist[30], r.hist_total / 2);
        assert_int_equal(r.hist[220], r.hist_total / 2);
        free((void *)f.data);
    }
}

/* Demo ground truth is honoured: the same scene rendered one stop brighter
 * (twice the light: APEX / ISO 2720 exposure values step in powers of two)
 * reads +1 EV, within 0.1 stop, through the whole analyzer. */
static void test_exposure_demo_one_stop(void **state)
{
    (void)state;
    static const char *const scenes[] = { "demo", "demo:tabletop" };
    const int w = 960, h = 540;
    uint8_t *buf = malloc((size_t)w * h * 4);
    assert_non_null(buf);
    for (int k = 0; k < 2; k++) {
        char err[256];
        cap_source_opts o = { .w = w, .h = h, .seed = 3 };
        cap_source *s = cap_source_open(scenes[k], &o, err, sizeof(err));
        assert_non_null(s);
        double ev[2];
        for (int i = 0; i < 2; i++) {
            cap_demo_pin pin = { .exposure_ev = i ? 0.5 : -0.5, .blur_sigma = NAN,
                                 .horizon_deg = NAN };
            assert_int_equal(cap_demo_set_pin(s, &pin), 0);
            cap_truth tr;
            assert_int_equal(cap_demo_render(s, 4.0, buf, w * 4, &tr), 0);
            coach_frame f = { .data = buf, .w = w, .h = h, .stride = w * 4,
                              .format = COACH_FMT_XRGB8888 };
            coach_result r;
            assert_int_equal(a_analyze_once(&f, &r), 0);
            ev[i] = r.exposure_ev;
        }
        assert_float_equal(ev[1] - ev[0], 1.0, 0.1);
        cap_source_destroy(s);
    }
    free(buf);
}

/* Clip fractions: luma >= 250 is a clipped highlight, <= 5 a blocked
 * shadow (thresholds of the issue, common practice for 8-bit video).
 * A frame with known shares of pixels at and around the thresholds. */
static void a_clip_pattern(int x, int y, void *ctx, uint8_t c[3])
{
    (void)ctx;
    int i = y * 100 + x; /* 100 x 100 frame, i = 0..9999 */
    int v = i < 300 ? 250 : i < 500 ? 255 : i < 700 ? 249 : i < 1800 ? 5 : i < 1900 ? 0 : i < 2000 ? 6 : 128;
    c[0] = c[1] = c[2] = (uint8_t)v;
}

static void test_clip_fractions_known(void **state)
{
    (void)state;
    coach_frame f = a_xrgb(100, 100, a_clip_pattern, NULL);
    coach_result r;
    assert_int_equal(a_analyze_once(&f, &r), 0);
    /* exact: every pixel is counted, though the histogram is sampled */
    assert_true(r.clip_high == 500.0 / 10000);  /* 500 of 10000 at >= 250 */
    assert_true(r.clip_low == 1200.0 / 10000);  /* 1200 of 10000 at <= 5 */
    free((void *)f.data);
}

/* Hasler & Suesstrunk 2003, eq. (3): M = sqrt(s_rg^2 + s_yb^2) + 0.3
 * sqrt(m_rg^2 + m_yb^2), rg = R - G, yb = (R + G)/2 - B, population moments
 * on 8-bit sRGB.  Grey has M = 0; other images must match the formula
 * evaluated here in double precision within 1 %. */
static void a_random(int x, int y, void *ctx, uint8_t c[3])
{
    uint32_t s = (uint32_t)(x * 73856093u) ^ (uint32_t)(y * 19349663u) ^ *(uint32_t *)ctx;
    s ^= s >> 13;
    s *= 0x5bd1e995u;
    s ^= s >> 15;
    c[0] = (uint8_t)s;
    c[1] = (uint8_t)(s >> 8);
    c[2] = (uint8_t)(s >> 16) / 2; /* bias toward yellow */
}

static void a_halves(int x, int y, void *ctx, uint8_t c[3])
{
    (void)y;
    (void)ctx;
    if (x < 40) {
        c[0] = 220; c[1] = 40; c[2] = 30;
    } else {
        c[0] = 20; c[1] = 90; c[2] = 200;
    }
}

static double a_hs_formula(const coach_frame *f)
{
    double srg = 0, syb = 0, qrg = 0, qyb = 0, n = (double)f->w * f->h;
    for (int y = 0; y < f->h; y++)
        for (int x = 0; x < f->w; x++) {
            const uint8_t *p = f->data + (size_t)y * f->stride + x * 4;
            double R = p[2], G = p[1], B = p[0];
            double rg = R - G, yb = 0.5 * (R + G) - B;
            srg += rg;
            syb += yb;
            qrg += rg * rg;
            qyb += yb * yb;
        }
    double mrg = srg / n, myb = syb / n;
    return sqrt(qrg / n - mrg * mrg + qyb / n - myb * myb) + 0.3 * sqrt(mrg * mrg + myb * myb);
}

static void test_colourfulness_hasler_formula(void **state)
{
    (void)state;
    uint8_t grey[3] = { 90, 90, 90 };
    coach_frame f = a_xrgb(64, 64, a_uniform, grey);
    coach_result r;
    assert_int_equal(a_analyze_once(&f, &r), 0);
    assert_true(r.colourfulness == 0.0); /* H&S 2003: grey has M = 0 */
    free((void *)f.data);

    uint32_t seed = 12345;
    coach_frame fr = a_xrgb(200, 150, a_random, &seed);
    assert_int_equal(a_analyze_once(&fr, &r), 0);
    double want = a_hs_formula(&fr);
    assert_true(want > 50);
    assert_float_equal(r.colourfulness, want, 0.01 * want);
    free((void *)fr.data);

    coach_frame fh = a_xrgb(80, 60, a_halves, NULL);
    assert_int_equal(a_analyze_once(&fh, &r), 0);
    want = a_hs_formula(&fh);
    assert_float_equal(r.colourfulness, want, 0.01 * want);
    free((void *)fh.data);
}

/* Hasler & Suesstrunk 2003, Table 2: metric values of the categories
 * not (0), slightly (15), moderately (33), averagely (45), quite (59),
 * highly (82), extremely (109) colourful; a value earns the word of the
 * highest category it reaches. */
static void test_colourfulness_word_categories(void **state)
{
    (void)state;
    static const struct { double m; const char *w; } cases[] = {
        { 0, "not colourful" },         { 14.9, "not colourful" },
        { 15, "slightly colourful" },   { 32.9, "slightly colourful" },
        { 33, "moderately colourful" }, { 44.9, "moderately colourful" },
        { 45, "averagely colourful" },  { 58.9, "averagely colourful" },
        { 59, "quite colourful" },      { 81.9, "quite colourful" },
        { 82, "highly colourful" },     { 108.9, "highly colourful" },
        { 109, "extremely colourful" }, { 300, "extremely colourful" },
    };
    for (size_t i = 0; i < sizeof(cases) / sizeof(cases[0]); i++)
        assert_string_equal(coach_colourfulness_word(cases[i].m), cases[i].w);
}

/* Variance of the 3x3 Laplacian [0 1 0; 1 -4 1; 0 1 0] over every pixel
 * with OpenCV's default border BORDER_REFLECT_101 ("gfedcb|abcdefgh|gfedcba",
 * OpenCV core docs, cv::BorderTypes), evaluated here directly; the same
 * against cv2 itself on photographs is tests/check_laplacian.sh. */
static int a_reflect101(int i, int n)
{
    return i < 0 ? -i : i >= n ? 2 * n - 2 - i : i;
}

static void test_sharpness_laplacian_reflect101(void **state)
{
    (void)state;
    uint32_t seed = 777;
    const int w = 97, h = 61; /* odd sizes: exercises the row tails */
    coach_frame f = a_xrgb(w, h, a_random, &seed);
    coach_result r;
    assert_int_equal(a_analyze_once(&f, &r), 0);
    /* luma per BT.709-6 rounded to 8 bits, as documented for the pass */
    double *Y = malloc(sizeof(double) * w * h);
    assert_non_null(Y);
    for (int y = 0; y < h; y++)
        for (int x = 0; x < w; x++) {
            const uint8_t *p = f.data + (size_t)y * f.stride + x * 4;
            Y[y * w + x] = (13933.0 * p[2] + 46871.0 * p[1] + 4732.0 * p[0] + 32768) / 65536;
            Y[y * w + x] = floor(Y[y * w + x]);
        }
    double s = 0, q = 0;
    for (int y = 0; y < h; y++)
        for (int x = 0; x < w; x++) {
            double L = Y[a_reflect101(y - 1, h) * w + x] + Y[a_reflect101(y + 1, h) * w + x] +
                       Y[y * w + a_reflect101(x - 1, w)] + Y[y * w + a_reflect101(x + 1, w)] -
                       4 * Y[y * w + x];
            s += L;
            q += L * L;
        }
    double n = (double)w * h, var = q / n - (s / n) * (s / n);
    assert_float_equal(r.sharpness, var, 1e-9 * var);
    free(Y);
    free((void *)f.data);
}

/* The hand-vectorised packed-pixel kernels and the portable loops are the
 * same integer arithmetic: identical histogram, statistics and analysis
 * image (the portable path is what machines without AVX2 run); and the
 * same picture as XRGB8888, RGB24 or BGR24 gives identical results. */
static void a_same_tone(const coach_result *r1, const coach_aimg *i1, const coach_result *r2,
                        const coach_aimg *i2)
{
    assert_memory_equal(r1->hist, r2->hist, sizeof(r1->hist));
    assert_true(r1->clip_high == r2->clip_high && r1->clip_low == r2->clip_low);
    assert_true(r1->exposure_ev == r2->exposure_ev);
    assert_true(r1->colourfulness == r2->colourfulness);
    assert_true(r1->sharpness == r2->sharpness);
    size_t n = (size_t)i1->w * i1->h * sizeof(float);
    assert_memory_equal(i1->luma, i2->luma, n);
    assert_memory_equal(i1->r, i2->r, n);
    assert_memory_equal(i1->g, i2->g, n);
    assert_memory_equal(i1->b, i2->b, n);
    assert_memory_equal(i1->lap, i2->lap, n);
    assert_memory_equal(i1->lap_sq, i2->lap_sq, n);
}

static void test_tone_simd_matches_portable(void **state)
{
    (void)state;
    /* widths with tails after 16-pixel steps, sizes whose blocks end
     * before the frame does (1283 = 4 * 320 + 3; 45 rows = 11 * 4 + 1), and
     * block widths 3, 4 and 6 (the hand-written flushes) */
    static const int sizes[][2] = { { 1203, 77 }, { 1283, 45 }, { 1925, 26 } };
    for (size_t k = 0; k < 3; k++) {
        uint32_t seed = 4242 + (uint32_t)k;
        const int w = sizes[k][0], h = sizes[k][1];
        coach_frame f = a_xrgb(w, h, a_random, &seed);
        /* the same pixels packed as RGB24 and BGR24, rows exactly 3w bytes
         * so the last row ends where the buffer does */
        uint8_t *rgb = malloc((size_t)w * h * 3), *bgr = malloc((size_t)w * h * 3);
        assert_non_null(rgb);
        assert_non_null(bgr);
        for (int y = 0; y < h; y++)
            for (int x = 0; x < w; x++) {
                const uint8_t *px = f.data + (size_t)y * f.stride + 4 * (size_t)x; /* B G R X */
                uint8_t *o = rgb + ((size_t)y * w + x) * 3, *q = bgr + ((size_t)y * w + x) * 3;
                o[0] = q[2] = px[2];
                o[1] = q[1] = px[1];
                o[2] = q[0] = px[0];
            }
        coach_frame fr = { .data = rgb, .w = w, .h = h, .stride = 3 * w, .format = COACH_FMT_RGB24 };
        coach_frame fb = fr;
        fb.data = bgr;
        fb.format = COACH_FMT_BGR24;
        const coach_frame *frames[3] = { &f, &fr, &fb };
        coach_tone *t1 = coach_tone_create(w, h), *t2 = coach_tone_create(w, h);
        assert_non_null(t1);
        assert_non_null(t2);
        coach_tone_set_simd(t1, 1);
        coach_tone_set_simd(t2, 0);
        static coach_result r0, r1, r2;
        coach_aimg i0, i1, i2;
        coach_tone *t0 = coach_tone_create(w, h); /* keeps i0's planes */
        assert_non_null(t0);
        coach_tone_set_simd(t0, 0);
        assert_int_equal(coach_tone_run(t0, &f, &r0, &i0), 0);
        for (int fi = 0; fi < 3; fi++) {
            assert_int_equal(coach_tone_run(t1, frames[fi], &r1, &i1), 0);
            assert_int_equal(coach_tone_run(t2, frames[fi], &r2, &i2), 0);
            a_same_tone(&r1, &i1, &r2, &i2); /* AVX2 == portable */
            a_same_tone(&r0, &i0, &r2, &i2); /* layout does not matter */
        }
        coach_tone_destroy(t0);
        coach_tone_destroy(t1);
        coach_tone_destroy(t2);
        free(rgb);
        free(bgr);
        free((void *)f.data);
    }
}

/* The AVX2 Y'CbCr loop and the portable unpack, colour and block loops:
 * identical results for YUYV and NV12 in both matrices and ranges, on
 * random bytes (every byte pattern is a valid frame, including chroma far
 * outside the gamut, which exercises the clamps).  1204 = 3 * 401 + 1:
 * blocks end at the odd column 1203, inside a chroma pair. */
static void test_tone_yuv_simd_matches_portable(void **state)
{
    (void)state;
    static const int sizes[][2] = { { 1204, 77 }, { 1282, 45 }, { 1924, 26 } };
    for (size_t k = 0; k < 3; k++) {
        const int w = sizes[k][0], h = sizes[k][1];
        size_t n = (size_t)w * h * 2;
        uint8_t *buf = malloc(n);
        assert_non_null(buf);
        uint32_t st = 99 + (uint32_t)k;
        for (size_t i = 0; i < n; i++) {
            st = st * 1664525u + 1013904223u;
            buf[i] = (uint8_t)(st >> 24);
        }
        coach_tone *t1 = coach_tone_create(w, h), *t2 = coach_tone_create(w, h);
        assert_non_null(t1);
        assert_non_null(t2);
        coach_tone_set_simd(t1, 1);
        coach_tone_set_simd(t2, 0);
        for (int v = 0; v < 4; v++) {
            coach_frame f = { .data = buf, .w = w, .h = h, .stride = v & 1 ? w : 2 * w,
                              .format = v & 1 ? COACH_FMT_NV12 : COACH_FMT_YUYV,
                              .matrix = v & 2 ? COACH_MATRIX_BT709 : COACH_MATRIX_BT601,
                              .range = v & 2 ? COACH_RANGE_LIMITED : COACH_RANGE_FULL };
            static coach_result r1, r2;
            coach_aimg i1, i2;
            assert_int_equal(coach_tone_run(t1, &f, &r1, &i1), 0);
            assert_int_equal(coach_tone_run(t2, &f, &r2, &i2), 0);
            a_same_tone(&r1, &i1, &r2, &i2);
        }
        coach_tone_destroy(t1);
        coach_tone_destroy(t2);
        free(buf);
    }
}

/* Random sizes, strides and pixel layouts: the AVX2 and portable passes
 * agree, and neither reads outside the frame (each buffer is exactly as
 * long as the frame, so the sanitiser build catches a read past its last
 * row: the vector loops' tails and 3-byte loads are where that could go
 * wrong). */
static void test_tone_random_layouts_simd_matches_portable(void **state)
{
    (void)state;
    static const coach_format fmts[] = { COACH_FMT_RGB24, COACH_FMT_BGR24, COACH_FMT_XRGB8888,
                                         COACH_FMT_YUYV,  COACH_FMT_NV12,  COACH_FMT_GREY };
    uint32_t st = 2024;
#define RND(n) ((st = st * 1664525u + 1013904223u), (int)((st >> 8) % (uint32_t)(n)))
    coach_tone *t1 = coach_tone_create(0, 0), *t2 = coach_tone_create(0, 0);
    assert_non_null(t1);
    assert_non_null(t2);
    coach_tone_set_simd(t1, 1);
    coach_tone_set_simd(t2, 0);
    for (int i = 0; i < 120; i++) {
        coach_format fm = fmts[RND(6)];
        int yuv = fm == COACH_FMT_YUYV || fm == COACH_FMT_NV12;
        int w = 8 + RND(700), h = 8 + RND(30);
        if (yuv)
            w &= ~1;
        int stride = w * coach_format_bpp(fm) + RND(3) * RND(9);
        size_t rows = fm == COACH_FMT_NV12 ? (size_t)h + (size_t)(h + 1) / 2 : (size_t)h;
        size_t n = (size_t)stride * rows;
        uint8_t *buf = malloc(n);
        assert_non_null(buf);
        for (size_t k = 0; k < n; k++)
            buf[k] = (uint8_t)RND(256);
        coach_frame f = { .data = buf, .w = w, .h = h, .stride = stride, .format = fm,
                          .matrix = RND(2) ? COACH_MATRIX_BT709 : COACH_MATRIX_BT601,
                          .range = RND(2) ? COACH_RANGE_FULL : COACH_RANGE_LIMITED };
        static coach_result r1, r2;
        coach_aimg i1, i2;
        assert_int_equal(coach_tone_run(t1, &f, &r1, &i1), 0);
        assert_int_equal(coach_tone_run(t2, &f, &r2, &i2), 0);
        a_same_tone(&r1, &i1, &r2, &i2);
        free(buf);
    }
#undef RND
    coach_tone_destroy(t1);
    coach_tone_destroy(t2);
}

/* ---- composition kernels with an AVX2 copy (compose_fft.c, level.c):
 * each copy must give exactly the portable results (the FFT against the
 * DFT's definition is tested below) ---- */

static uint32_t c_seed = 12345u;
static double c_urand(void)
{
    c_seed = c_seed * 1664525u + 1013904223u; /* Numerical Recipes' LCG constants */
    return (c_seed >> 8) * (1.0 / 16777216.0);
}

/* The portable and the AVX2 butterflies give bit-identical transforms
 * (the same IEEE single-precision operations in the same order), forward
 * and inverse, at the saliency's 64x64 and the motion estimate's 128x64. */
static void test_fft2d_simd_matches_portable(void **state)
{
    (void)state;
    static const int sizes[][2] = {{64, 64}, {128, 64}, {16, 8}};
    static float a[2 * 128 * 64], b[2 * 128 * 64], scratch[2 * 128 * 64];
    for (size_t s = 0; s < sizeof sizes / sizeof sizes[0]; s++) {
        const int w = sizes[s][0], h = sizes[s][1], n = 2 * w * h;
        coach_fft_plan px, py;
        assert_int_equal(coach_fft_plan_init(&px, w), 0);
        assert_int_equal(coach_fft_plan_init(&py, h), 0);
        for (int i = 0; i < n; i++)
            a[i] = b[i] = (float)(c_urand() * 255.0 - 128.0);
        for (int inverse = 0; inverse <= 1; inverse++) {
            coach_fft2d(&px, &py, a, scratch, inverse);
            coach_fft_plan qx = px, qy = py;
            qx.simd = qy.simd = 0;
            coach_fft2d(&qx, &qy, b, scratch, inverse);
            assert_memory_equal(a, b, (size_t)n * sizeof(float));
        }
    }
}

/* The level with the AVX2 Sobel pass and with the portable one: the same
 * estimate, field by field, on tilted horizons over noise and on frames of
 * leaning posts (the vertical family), both within 0.1 degree of the
 * rendered angle. */
static void test_level_simd_matches_portable(void **state)
{
    (void)state;
    enum { W = 320, H = 180 };
    static float luma[W * H];
    coach_level *l = coach_level_create(W, H);
    assert_non_null(l);
    for (int scene = 0; scene < 6; scene++) {
        const double deg = -12.0 + 5.0 * scene, t = tan(deg * M_PI / 180.0);
        for (int y = 0; y < H; y++)
            for (int x = 0; x < W; x++) {
                /* edges anti-aliased over about a pixel, as a lens draws them */
                double v;
                if (scene < 4) { /* horizon: sky above, darker sea below */
                    double d = (y - (0.45 * H - t * (x - 0.5 * W))) * cos(atan(t));
                    v = 170.0 - 100.0 * fmin(fmax(d + 0.5, 0.0), 1.0);
                } else { /* posts 8 px wide every 64 px, leaning by deg */
                    double u = fmod(x + t * (y - 0.5 * H) + 1024.0, 64.0) * cos(atan(t));
                    v = 90.0 + 110.0 * fmin(fmax(fmin(u, 8.0 - u) + 0.5, 0.0), 1.0);
                }
                luma[y * W + x] = (float)(v + 12.0 * (c_urand() - 0.5));
            }
        coach_level_est e1, e0;
        coach_level_set_simd(l, 1);
        coach_level_run(l, luma, W, H, &e1);
        coach_level_set_simd(l, 0);
        coach_level_run(l, luma, W, H, &e0);
        /* the rendered angle: a horizon rising to the right by deg reads
         * +deg; posts whose tops lean right by deg read -deg */
        assert_true(e1.has_tilt);
        assert_true(fabs(e1.tilt_deg - (scene < 4 ? deg : -deg)) < 0.1);
        assert_memory_equal(&e1, &e0, sizeof e1);
    }
    coach_level_destroy(l);
}

/* ---- score ---- */

/* A first-order low-pass of time constant tau answers a unit step with
 * 1 - exp(-t / tau) (any control-engineering text); sampled at irregular
 * intervals the smoother must follow that curve exactly. */
static void test_score_smoothing_step_response(void **state)
{
    (void)state;
    const double tau = 0.5;
    double y = 0, t = 0;
    static const double dts[] = { 0.033, 0.017, 0.050, 0.100, 0.033, 0.250, 0.040, 0.400 };
    for (size_t i = 0; i < sizeof(dts) / sizeof(dts[0]); i++) {
        y = coach_smooth_step(y, 100.0, dts[i], tau);
        t += dts[i];
        assert_float_equal(y, 100.0 * (1 - exp(-t / tau)), 1e-9);
    }
    /* through the analyzer state as well */
    coach_config cfg;
    coach_config_default(&cfg);
    coach_score_state s;
    coach_score_reset(&s);
    coach_result r;
    memset(&r, 0, sizeof(r));
    r.score_raw = 0;
    coach_score_update(&s, &cfg, 10.0, &r);
    r.score_raw = 80;
    coach_score_update(&s, &cfg, 10.0 + cfg.smooth_tau_s, &r);
    assert_float_equal(r.score, 80 * (1 - exp(-1.0)), 1e-9); /* one tau: 63.2 % */
}

/* Ready with hysteresis (enter >= ready_enter held ready_dwell_s, leave
 * < ready_leave): a score oscillating between the two thresholds never
 * changes the state, and brief peaks over the upper one never enter it. */
static void test_ready_hysteresis_no_flicker(void **state)
{
    (void)state;
    coach_config cfg;
    coach_config_default(&cfg);
    cfg.smooth_tau_s = 0; /* drive the ready logic with the raw score */
    coach_score_state s;
    coach_score_reset(&s);
    coach_result r;
    memset(&r, 0, sizeof(r));
    double t = 0, dt = 1 / 30.0;
    /* peaks above enter shorter than the dwell: never ready */
    for (int i = 0; i < 310; i++, t += dt) { /* ends on a low stretch */
        r.score_raw = (i / 10) % 2 ? cfg.ready_enter + 5 : cfg.ready_leave - 5;
        coach_score_update(&s, &cfg, t, &r);
        assert_int_equal(r.ready, 0);
    }
    /* held above enter: ready once the dwell has passed, not before */
    double t0 = t;
    for (int i = 0; i < 60; i++, t += dt) {
        r.score_raw = cfg.ready_enter + 1;
        coach_score_update(&s, &cfg, t, &r);
        if (t - t0 < cfg.ready_dwell_s - 1e-6)
            assert_int_equal(r.ready, 0);
        else if (t - t0 > cfg.ready_dwell_s + 1e-6)
            assert_int_equal(r.ready, 1);
    }
    /* oscillating between the thresholds: stays ready, never flickers */
    for (int i = 0; i < 300; i++, t += dt) {
        r.score_raw = i % 2 ? cfg.ready_enter - 0.1 : cfg.ready_leave + 0.1;
        coach_score_update(&s, &cfg, t, &r);
        assert_int_equal(r.ready, 1);
    }
    r.score_raw = cfg.ready_leave - 0.1;
    coach_score_update(&s, &cfg, t, &r);
    assert_int_equal(r.ready, 0);
    /* and between the thresholds from below: stays not ready */
    for (int i = 0; i < 300; i++, t += dt) {
        r.score_raw = i % 2 ? cfg.ready_enter - 0.1 : cfg.ready_leave + 0.1;
        coach_score_update(&s, &cfg, t, &r);
        assert_int_equal(r.ready, 0);
    }
}

/* Contributions are 100 w v / sum(w) and add up to the score; hints come
 * worst term first (most points lost), at most three, in plain words with
 * the numbers the user acts on. */
static void test_score_hints_worst_first(void **state)
{
    (void)state;
    coach_config cfg;
    coach_config_default(&cfg); /* landscape, thirds */
    coach_result r;
    memset(&r, 0, sizeof(r));
    r.width = 1920;
    r.height = 1080;
    r.exposure_ev = 0.1;
    r.clip_high = 0.06; /* badly clipped */
    r.clip_low = 0.0;
    r.sharpness = 400;
    r.colourfulness = 50;
    r.has_tilt = 1;
    r.tilt_deg = 2.14; /* right end higher */
    r.tilt_confidence = 1;
    r.has_horizon = 1;
    r.horizon_y = 0.45; /* near the middle */
    coach_score_terms(&cfg, 0, &r);
    double sum = 0, wsum = 0;
    for (int i = 0; i < r.nterms; i++) {
        sum += r.terms[i].contribution;
        wsum += r.terms[i].weight;
    }
    for (int i = 0; i < r.nterms; i++)
        assert_float_equal(r.terms[i].contribution,
                           100 * r.terms[i].weight * r.terms[i].value / wsum, 1e-9);
    assert_float_equal(sum, r.score_raw, 1e-9);
    coach_score_hints(&cfg, &r);
    assert_true(r.nhints >= 2 && r.nhints <= COACH_MAX_HINTS);
    /* level loses 1.5 * (1 - 1/(1+2.14^2)) = 1.23 points of weight,
     * highlights 0.8, horizon 1.0 * 0.78: level first */
    assert_string_equal(r.hints[0], "Rotate the camera 2.1\xc2\xb0 counterclockwise");
    assert_non_null(strstr(r.hints[1], "Highlights are clipping"));
    assert_non_null(strstr(r.hints[2], "horizon on the upper third"));
    r.tilt_deg = -0.9;
    coach_score_terms(&cfg, 0, &r);
    coach_score_hints(&cfg, &r);
    assert_non_null(strstr(r.hints[0], "Highlights are clipping: try about -1.3 stops"));
}

/* The value of the named term, or -1 when it does not take part. */
static double a_term(const coach_result *r, const char *name)
{
    for (int i = 0; i < r->nterms; i++)
        if (strcmp(r->terms[i].name, name) == 0)
            return r->terms[i].value;
    return -1;
}

static int a_has_hint(const coach_result *r, const char *part)
{
    for (int i = 0; i < r->nhints; i++)
        if (strstr(r->hints[i], part))
            return 1;
    return 0;
}

/* A hand-made result: w x h frame, a centred subject, everything else
 * unremarkable (sharp, colourful, exposed at ev). */
static void a_result_centred(coach_result *r, int w, int h, double ev, double colour)
{
    memset(r, 0, sizeof(*r));
    r->width = w;
    r->height = h;
    r->exposure_ev = ev;
    r->sharpness = 300;
    r->colourfulness = colour;
    r->has_subject = 1;
    r->subject = (coach_box){ 0.5, 0.5, 0.2, 0.4 };
}

/* Renders one demo frame at time t with the blur pinned to sigma (full-res
 * pixels) and analyses it. */
static void a_demo_blur(cap_source *s, coach_analyzer *a, uint8_t *buf, int w, int h, double t,
                        double sigma, coach_result *r)
{
    cap_demo_pin pin = { .exposure_ev = NAN, .blur_sigma = sigma, .horizon_deg = NAN };
    assert_int_equal(cap_demo_set_pin(s, &pin), 0);
    cap_truth tr;
    assert_int_equal(cap_demo_render(s, t, buf, w * 4, &tr), 0);
    assert_float_equal(tr.blur_sigma, sigma, 1e-9);
    coach_frame f = { .data = buf, .w = w, .h = h, .stride = w * 4, .format = COACH_FMT_XRGB8888 };
    assert_int_equal(coach_analyze(a, &f, t, r), 0);
}

/* The sharpness term follows the demo's ground-truth blur: high while the
 * Gaussian blur is under half a pixel (invisible at 100 %: the pixel grid
 * itself blurs that much; common practice), clearly low from 2 px on.  Live
 * it is judged against the scene's recent best; a still (fresh analyzer)
 * through the lenient absolute floor, which passes the sharp tabletop
 * shot on its smooth backdrop and fails the plainly blurred harbour. */
static void test_score_sharpness_follows_demo_blur(void **state)
{
    (void)state;
    const int w = 960, h = 540;
    uint8_t *buf = malloc((size_t)w * h * 4);
    assert_non_null(buf);
    char err[256];
    cap_source_opts o = { .w = w, .h = h, .seed = 5 };
    cap_source *s = cap_source_open("demo", &o, err, sizeof(err));
    assert_non_null(s);
    coach_analyzer *a = coach_create(NULL);
    assert_non_null(a);
    coach_result r;
    double t = 1.0;
    static const double sharp[] = { 0, 0, 0, 0.25, 0.4, 0.5, 0.3, 0 };
    for (size_t i = 0; i < sizeof(sharp) / sizeof(sharp[0]); i++, t += 1.0 / 15) {
        a_demo_blur(s, a, buf, w, h, t, sharp[i], &r);
        assert_true(r.sharpness_ref >= r.sharpness);
        assert_true(a_term(&r, "sharpness") >= 0.8);
        assert_false(a_has_hint(&r, "Refocus"));
    }
    static const double soft[] = { 2.0, 2.5, 3.0, 4.0 };
    for (size_t i = 0; i < sizeof(soft) / sizeof(soft[0]); i++, t += 1.0 / 15) {
        a_demo_blur(s, a, buf, w, h, t, soft[i], &r);
        assert_true(a_term(&r, "sharpness") <= 0.3);
    }
    /* forgetting the scene forgets its best: the soft frame alone is then
     * judged by the floor, which still finds it soft */
    coach_reset(a);
    a_demo_blur(s, a, buf, w, h, t, 3.0, &r);
    assert_float_equal(r.sharpness_ref, r.sharpness, 1e-12);
    assert_true(a_term(&r, "sharpness") <= 0.5);
    coach_destroy(a);
    cap_source_destroy(s);

    /* stills: the sharp product shot passes, with no advice to refocus */
    s = cap_source_open("demo:tabletop", &o, err, sizeof(err));
    assert_non_null(s);
    coach_config cfg;
    coach_config_default(&cfg);
    cfg.profile = COACH_PROFILE_PRODUCT;
    a = coach_create(&cfg);
    assert_non_null(a);
    a_demo_blur(s, a, buf, w, h, 2.0, 0.0, &r);
    assert_true(a_term(&r, "sharpness") >= 0.9);
    assert_false(a_has_hint(&r, "Refocus"));

    /* a cut from the textured harbour to the smooth tabletop (the next
     * still of a folder) is a new scene, not a loss of focus: the tabletop
     * at half a pixel of blur has a fifth of the harbour's variance */
    cap_source *s2 = cap_source_open("demo", &o, err, sizeof(err));
    assert_non_null(s2);
    a_demo_blur(s2, a, buf, w, h, 3.0, 0.0, &r);
    double harbour = r.sharpness;
    a_demo_blur(s, a, buf, w, h, 3.0 + 1.0 / 15, 0.5, &r);
    assert_true(r.sharpness < 0.3 * harbour);
    assert_float_equal(r.sharpness_ref, r.sharpness, 1e-12);
    assert_true(a_term(&r, "sharpness") >= 0.8);
    cap_source_destroy(s2);
    coach_destroy(a);
    cap_source_destroy(s);
    free(buf);
}

/* Placement by profile (common practice): a catalogue product is commonly
 * centred on its seamless backdrop, so in the product profile the centre
 * is as good a place as a power point; a portrait keeps the thirds (eyes
 * and head on the upper third).  Distances are fractions of the diagonal,
 * the centre of a 16:9 frame lying 0.167 from each thirds point. */
static void test_score_product_centre_portrait_thirds(void **state)
{
    (void)state;
    coach_config cfg;
    coach_config_default(&cfg);
    coach_result r;
    a_result_centred(&r, 1920, 1080, 0, 50);
    r.placement = hypot(1920 / 6.0, 1080 / 6.0) / hypot(1920, 1080);
    r.placement_point = 0; /* upper-left, one of four at the same distance */

    cfg.profile = COACH_PROFILE_PRODUCT;
    coach_score_terms(&cfg, 0, &r);
    coach_score_hints(&cfg, &r);
    assert_float_equal(a_term(&r, "placement"), 1.0, 1e-9);
    assert_false(a_has_hint(&r, "subject toward"));
    assert_false(a_has_hint(&r, "Centre the product"));

    cfg.profile = COACH_PROFILE_PORTRAIT;
    coach_score_terms(&cfg, 0, &r);
    coach_score_hints(&cfg, &r);
    assert_true(a_term(&r, "placement") < 0.3);
    assert_true(a_has_hint(&r, "Move the subject toward the upper-left third"));

    /* a product off-centre, nearer the centre than any third: centre it */
    r.subject.x = 0.40;
    r.subject.y = 0.62;
    r.placement = hypot((0.40 - 1 / 3.0) * 1920, (0.62 - 2 / 3.0) * 1080) / hypot(1920, 1080) + 0.1;
    cfg.profile = COACH_PROFILE_PRODUCT;
    coach_score_terms(&cfg, 0, &r);
    coach_score_hints(&cfg, &r);
    assert_true(a_term(&r, "placement") < 0.75);
    assert_true(a_has_hint(&r, "Centre the product"));
}

/* Advice only for what costs points: a neutral product (Hasler & Suesstrunk
 * 2003, Table 2: M below 15 is "not colourful") loses under 3 of 100
 * points on the light colour term of the product profile and gets no
 * colour hint; the same frame judged as a landscape, where colour weighs
 * more, does. */
static void test_score_hints_need_points(void **state)
{
    (void)state;
    coach_config cfg;
    coach_config_default(&cfg);
    coach_result r;
    a_result_centred(&r, 1280, 720, 0.5, 5);
    r.has_tilt = 1;
    r.tilt_confidence = 1;
    r.placement = 0.167;
    r.has_subject_focus = 1;
    r.subject_focus = 2;
    r.has_motion = 1;

    cfg.profile = COACH_PROFILE_PRODUCT;
    coach_score_terms(&cfg, 1, &r);
    coach_score_hints(&cfg, &r);
    assert_float_equal(a_term(&r, "colour"), 0.0, 1e-9);
    assert_int_equal(r.nhints, 0);

    cfg.profile = COACH_PROFILE_LANDSCAPE;
    r.exposure_ev = 0;
    coach_score_terms(&cfg, 1, &r);
    coach_score_hints(&cfg, &r);
    assert_true(a_has_hint(&r, "Look for stronger colour: the scene is not colourful"));
}

/* Switching the profile at run time (the window's profile key): from the
 * next frame on the terms are those of the new profile, exactly as an
 * analyzer made with it scores the same frames, while the smoothed score
 * glides from where it was by the first-order low-pass step (the exact
 * response of dy/dt = (x - y) / tau) instead of restarting. */
static void test_set_profile_keeps_state(void **state)
{
    (void)state;
    const int w = 640, h = 480;
    uint8_t *buf = malloc((size_t)w * h * 4);
    assert_non_null(buf);
    char err[256];
    cap_source_opts o = { .w = w, .h = h, .seed = 2 };
    cap_source *s = cap_source_open("demo:tabletop", &o, err, sizeof(err));
    assert_non_null(s);
    coach_config cfg;
    coach_config_default(&cfg);
    coach_analyzer *a = coach_create(&cfg); /* landscape */
    cfg.profile = COACH_PROFILE_PRODUCT;
    coach_analyzer *ref = coach_create(&cfg);
    assert_non_null(a);
    assert_non_null(ref);
    coach_result r, q;
    double prev = 0, t = 0;
    for (int i = 0; i < 6; i++, t += 0.1) {
        a_demo_blur(s, a, buf, w, h, t, 0.0, &r);
        a_demo_blur(s, ref, buf, w, h, t, 0.0, &q);
        prev = r.score;
    }
    assert_true(a_term(&r, "placement") >= 0 && strcmp(r.terms[0].name, "exposure") == 0);
    coach_set_profile(a, COACH_PROFILE_PRODUCT);
    a_demo_blur(s, a, buf, w, h, t, 0.0, &r);
    a_demo_blur(s, ref, buf, w, h, t, 0.0, &q);
    assert_int_equal(r.nterms, q.nterms);
    for (int i = 0; i < r.nterms; i++) {
        assert_string_equal(r.terms[i].name, q.terms[i].name);
        assert_float_equal(r.terms[i].weight, q.terms[i].weight, 0);
        assert_float_equal(r.terms[i].contribution, q.terms[i].contribution, 1e-9);
    }
    assert_float_equal(r.score_raw, q.score_raw, 1e-9);
    assert_float_equal(r.score, coach_smooth_step(prev, r.score_raw, 0.1, cfg.smooth_tau_s), 1e-6);
    /* an unknown profile changes nothing */
    coach_set_profile(a, COACH_PROFILE_COUNT);
    coach_set_profile(NULL, COACH_PROFILE_PORTRAIT);
    a_demo_blur(s, a, buf, w, h, t + 0.1, 0.0, &r);
    assert_float_equal(r.terms[0].weight, q.terms[0].weight, 0);
    coach_destroy(a);
    coach_destroy(ref);
    cap_source_destroy(s);
    free(buf);
}

/* ---- JSON ---- */

/* A small JSON (RFC 8259) syntax checker for the test: returns the end of
 * the value at p or NULL. */
static const char *a_json_value(const char *p);
static const char *a_ws(const char *p)
{
    while (*p == ' ' || *p == '\n' || *p == '\t' || *p == '\r')
        p++;
    return p;
}
static const char *a_json_string(const char *p)
{
    if (*p++ != '"')
        return NULL;
    while (*p && *p != '"') {
        if ((unsigned char)*p < 0x20)
            return NULL;
        if (*p == '\\') {
            p++;
            if (*p == 'u') {
                for (int i = 1; i <= 4; i++)
                    if (!isxdigit((unsigned char)p[i]))
                        return NULL;
                p += 4;
            } else if (!strchr("\"\\/bfnrt", *p)) {
                return NULL;
            }
        }
        p++;
    }
    return *p == '"' ? p + 1 : NULL;
}
static const char *a_json_value(const char *p)
{
    p = a_ws(p);
    if (*p == '{' || *p == '[') {
        char close = *p == '{' ? '}' : ']';
        p = a_ws(p + 1);
        if (*p == close)
            return p + 1;
        for (;;) {
            if (close == '}') {
                if (!(p = a_json_string(a_ws(p))))
                    return NULL;
                p = a_ws(p);
                if (*p++ != ':')
                    return NULL;
            }
            if (!(p = a_json_value(p)))
                return NULL;
            p = a_ws(p);
            if (*p == close)
                return p + 1;
            if (*p++ != ',')
                return NULL;
        }
    }
    if (*p == '"')
        return a_json_string(p);
    if (!strncmp(p, "true", 4) || !strncmp(p, "null", 4))
        return p + 4;
    if (!strncmp(p, "false", 5))
        return p + 5;
    const char *q = p;
    if (*q == '-')
        q++;
    if (!isdigit((unsigned char)*q))
        return NULL;
    if (*q == '0' && isdigit((unsigned char)q[1]))
        return NULL;
    while (isdigit((unsigned char)*q))
        q++;
    if (*q == '.') {
        q++;
        if (!isdigit((unsigned char)*q))
            return NULL;
        while (isdigit((unsigned char)*q))
            q++;
    }
    return q;
}

static void test_json_structure_no_nan(void **state)
{
    (void)state;
    uint32_t seed = 99;
    coach_frame f = a_xrgb(128, 96, a_random, &seed);
    coach_result r;
    assert_int_equal(a_analyze_once(&f, &r), 0);
    free((void *)f.data);
    /* poison what an analysis might leave odd: non-finite numbers must
     * come out as null, absent measurements as null */
    r.exposure_ev = -INFINITY;
    r.sharpness = NAN;
    r.has_tilt = 1;
    r.tilt_deg = NAN;
    r.level_source = COACH_LEVEL_HORIZON;
    r.has_subject = 1;
    r.subject = (coach_box){ 0.3, 0.4, 0.1, 0.2 };
    r.placement = 0.05;
    r.placement_point = 1;
    r.edge_intrusions = COACH_EDGE_LEFT | COACH_EDGE_BOTTOM;
    char buf[8192];
    int n = coach_json(&r, "dir/\"odd\"\\name\x01.png", buf, sizeof(buf));
    assert_true(n > 0 && (size_t)n < sizeof(buf));
    assert_int_equal((int)strlen(buf), n);
    const char *end = a_json_value(buf);
    assert_non_null(end); /* RFC 8259 syntax */
    assert_int_equal(*a_ws(end), 0);
    assert_null(strstr(buf, "nan"));
    assert_null(strstr(buf, "inf"));
    static const char *const keys[] = {
        "\"file\":\"dir/\\\"odd\\\"\\\\name\\u0001.png\"", "\"width\":128", "\"height\":96",
        "\"exposure_ev\":null", "\"clip_high\":", "\"clip_low\":", "\"colourfulness\":",
        "\"sharpness\":null", "\"score\":", "\"score_raw\":", "\"ready\":false",
        "\"tilt_deg\":null", "\"level_source\":\"horizon\"", "\"tilt_confidence\":",
        "\"horizon_y\":null", "\"subject\":{\"x\":0.3,\"y\":0.4,\"w\":0.1,\"h\":0.2}",
        "\"placement\":{\"distance\":0.05,\"point\":\"upper-right\"}", "\"balance\":{\"lr\":",
        "\"edge_intrusions\":[\"left\",\"bottom\"]", "\"lead_room\":null", "\"motion_px_s\":",
        "\"subject_focus\":null", "\"terms\":{\"exposure\":{\"value\":", "\"hints\":[",
    };
    for (size_t i = 0; i < sizeof(keys) / sizeof(keys[0]); i++)
        assert_non_null(strstr(buf, keys[i]));
    /* truncation reports the length needed, like snprintf */
    char small[16];
    assert_int_equal(coach_json(&r, NULL, small, sizeof(small)), coach_json(&r, NULL, buf, sizeof(buf)));
    assert_int_equal((int)strlen(small), 15);
}

/* ---- allocation ---- */

/* The test binary is linked with -Wl,--wrap for the allocators (see
 * LDLIBS_test_coach in the Makefile), so every allocation made by the
 * library passes through these counters. */
static long a_allocs;
void *__real_malloc(size_t n);
void *__real_calloc(size_t k, size_t n);
void *__real_realloc(void *p, size_t n);
void *__real_aligned_alloc(size_t al, size_t n);
int __real_posix_memalign(void **p, size_t al, size_t n);
void *__wrap_malloc(size_t n);
void *__wrap_calloc(size_t k, size_t n);
void *__wrap_realloc(void *p, size_t n);
void *__wrap_aligned_alloc(size_t al, size_t n);
int __wrap_posix_memalign(void **p, size_t al, size_t n);
void *__wrap_malloc(size_t n)
{
    a_allocs++;
    return __real_malloc(n);
}
void *__wrap_calloc(size_t k, size_t n)
{
    a_allocs++;
    return __real_calloc(k, n);
}
void *__wrap_realloc(void *p, size_t n)
{
    a_allocs++;
    return __real_realloc(p, n);
}
void *__wrap_aligned_alloc(size_t al, size_t n)
{
    a_allocs++;
    return __real_aligned_alloc(al, n);
}
int __wrap_posix_memalign(void **p, size_t al, size_t n)
{
    a_allocs++;
    return __real_posix_memalign(p, al, n);
}

typedef struct { int t; } a_moving;
static void a_scene(int x, int y, void *ctx, uint8_t c[3])
{
    int t = ((a_moving *)ctx)->t;
    int horizon = 100 + t % 7;
    int in_subject = abs(x - (60 + t)) < 12 && abs(y - 140) < 20;
    int v = y < horizon ? 150 + y / 4 : 60 + ((x * 13 + y * 7 + t) & 31);
    c[0] = (uint8_t)(in_subject ? 220 : v / 2);
    c[1] = (uint8_t)(in_subject ? 40 : v / 2 + 20);
    c[2] = (uint8_t)(in_subject ? 30 : v);
}

/* Conventions (DEVELOPERS.md): no allocation in the per-frame path.  300
 * frames of analysis in steady state, each format, make none. */
static void test_alloc_steady_state_zero(void **state)
{
    (void)state;
    const int w = 640, h = 360;
    coach_frame frames[4];
    a_moving mv;
    for (int i = 0; i < 4; i++) {
        mv.t = i * 9;
        frames[i] = a_xrgb(w, h, a_scene, &mv);
    }
    uint8_t *yuyv = calloc((size_t)w * h, 2);
    assert_non_null(yuyv);
    for (size_t i = 0; i < (size_t)w * h * 2; i++)
        yuyv[i] = (uint8_t)(i % 2 ? 128 : (i * 7) % 220 + 16);
    coach_frame fy = { .data = yuyv, .w = w, .h = h, .stride = w * 2, .format = COACH_FMT_YUYV };
    coach_config cfg;
    coach_config_default(&cfg);
    cfg.max_w = w;
    cfg.max_h = h;
    coach_analyzer *a = coach_create(&cfg);
    assert_non_null(a);
    static coach_result r;
    static char js[8192];
    assert_int_equal(coach_analyze(a, &frames[0], 0.0, &r), 0); /* warm-up */
    long before = a_allocs;
    for (int i = 1; i <= 300; i++) {
        const coach_frame *f = i % 50 == 25 ? &fy : &frames[i % 4];
        assert_int_equal(coach_analyze(a, f, i / 30.0, &r), 0);
        coach_json(&r, "frame", js, sizeof(js));
    }
    long during = a_allocs - before;
    assert_int_equal(during, 0);
    coach_destroy(a);
    for (int i = 0; i < 4; i++)
        free((void *)frames[i].data);
    free(yuyv);
    /* the counters do see the library's allocations (the test can fail) */
    before = a_allocs;
    a = coach_create(&cfg);
    assert_true(a_allocs > before);
    coach_destroy(a);
}

/* ==== section B ==== */

/* ---- helpers (section B) ---- */

/* Deterministic noise for test scenes (a 32-bit LCG, Numerical Recipes). */
static uint32_t b_seed = 12345u;
static double b_rand(void)
{
    b_seed = b_seed * 1664525u + 1013904223u;
    return (b_seed >> 8) * (1.0 / 16777216.0);
}
static uint8_t b_u8(double v) { return v < 0 ? 0 : v > 255 ? 255 : (uint8_t)lrint(v); }

static coach_frame b_frame(int w, int h)
{
    uint8_t *p = malloc((size_t)w * h * 3);
    assert_non_null(p);
    coach_frame f = { .data = p, .w = w, .h = h, .stride = w * 3, .format = COACH_FMT_RGB24 };
    return f;
}
static uint8_t *b_px(const coach_frame *f, int x, int y)
{
    return (uint8_t *)f->data + (size_t)y * f->stride + 3 * (size_t)x;
}

/* Sky over a textured sea; the horizon passes through (w/2, yf*h) at deg
 * degrees (+: right end higher).  The boundary is anti-aliased by the
 * pixel's coverage (a 1-pixel ramp of the signed distance); swell runs
 * parallel to the horizon, as it does when the camera rolls. */
static void b_horizon(const coach_frame *f, double deg, double yf, double noise)
{
    const double th = deg * M_PI / 180.0, nx = sin(th), ny = cos(th);
    const double cx = 0.5 * f->w, cy = yf * f->h;
    for (int y = 0; y < f->h; y++)
        for (int x = 0; x < f->w; x++) {
            double px = x + 0.5 - cx, py = y + 0.5 - cy;
            double d = px * nx + py * ny; /* + below the horizon */
            double sea = d + 0.5;
            sea = sea < 0 ? 0 : sea > 1 ? 1 : sea;
            double t = (double)y / f->h, n = noise * (2 * b_rand() - 1);
            double wave = sea > 0 ? 10 * sin(0.9 * sqrt(d > 0 ? d : 0) + 0.02 * (px * ny - py * nx)) * (0.3 + t) : 0;
            uint8_t *p = b_px(f, x, y);
            p[0] = b_u8((120 + 80 * t) * (1 - sea) + (30 + wave) * sea + n);
            p[1] = b_u8((160 + 60 * t) * (1 - sea) + (70 + wave) * sea + n);
            p[2] = b_u8((230 - 10 * t) * (1 - sea) + (110 + wave) * sea + n);
        }
}

/* A quiet backdrop (soft gradient, light noise) with one anti-aliased disc
 * of radius rf * h at (xf * w, yf * h). */
static void b_subject(const coach_frame *f, double xf, double yf, double rf, const uint8_t col[3])
{
    const double cx = xf * f->w, cy = yf * f->h, r = rf * f->h;
    for (int y = 0; y < f->h; y++)
        for (int x = 0; x < f->w; x++) {
            double in = 0.5 - (hypot(x + 0.5 - cx, y + 0.5 - cy) - r);
            in = in < 0 ? 0 : in > 1 ? 1 : in;
            double bg = 180 + 20.0 * y / f->h, n = 3 * (b_rand() - 0.5);
            uint8_t *p = b_px(f, x, y);
            for (int c = 0; c < 3; c++)
                p[c] = b_u8(bg * (1 - in) + col[c] * in + n);
        }
}

static coach_analyzer *b_analyzer(coach_grid grid)
{
    coach_config cfg;
    coach_config_default(&cfg);
    cfg.grid = grid;
    coach_analyzer *a = coach_create(&cfg);
    assert_non_null(a);
    return a;
}

/* ---- level and horizon ---- */

/* The bounds for rendered horizons from -15 to +15 degrees at
 * several heights and sizes: level mean absolute error <= 0.3 degree, max
 * <= 1 degree; horizon height within 0.02 of the truth.  The truth is the
 * geometry the scene was rendered from. */
static void test_level_rendered_horizons(void **state)
{
    (void)state;
    static const struct { int w, h; double step; int nh; } sizes[] = {
        {640, 480, 1.5, 3}, {1280, 720, 3.0, 3}, {1000, 700, 5.0, 2}, {1920, 1080, 5.0, 2},
    };
    static const double heights[] = {0.33, 0.5, 0.67};
    coach_analyzer *a = b_analyzer(COACH_GRID_THIRDS);
    static coach_result r;
    double sum = 0, worst = 0, worst_y = 0;
    int n = 0;
    for (size_t s = 0; s < sizeof sizes / sizeof sizes[0]; s++) {
        coach_frame f = b_frame(sizes[s].w, sizes[s].h);
        for (int k = 0; k < sizes[s].nh; k++)
            for (double deg = -15; deg <= 15.001; deg += sizes[s].step) {
                double yf = heights[sizes[s].nh == 3 ? k : 2 * k];
                b_horizon(&f, deg, yf, 4.0);
                coach_reset(a);
                assert_int_equal(coach_analyze(a, &f, 0.0, &r), 0);
                assert_true(r.has_tilt);
                assert_int_equal(r.level_source, COACH_LEVEL_HORIZON);
                assert_true(r.has_horizon);
                double e = fabs(r.tilt_deg - deg), ey = fabs(r.horizon_y - yf);
                sum += e;
                n++;
                worst = e > worst ? e : worst;
                worst_y = ey > worst_y ? ey : worst_y;
            }
        free((void *)f.data);
    }
    coach_destroy(a);
    print_message("level: %d horizons, mean abs error %.4f deg, max %.4f deg; horizon_y max error %.4f\n",
                  n, sum / n, worst, worst_y);
    assert_true(sum / n <= 0.3);
    assert_true(worst <= 1.0);
    assert_true(worst_y <= 0.02);
}

/* A subject standing on the horizon (a boat) interrupts it: the level and
 * horizon height keep the bounds, and the subject is still found
 * (centre within 5 % of the diagonal). */
static void test_level_horizon_behind_subject(void **state)
{
    (void)state;
    static const uint8_t hull[3] = {240, 235, 220};
    coach_analyzer *a = b_analyzer(COACH_GRID_THIRDS);
    static coach_result r;
    coach_frame f = b_frame(1280, 720);
    for (double deg = -10; deg <= 10.01; deg += 5) {
        const double yf = 0.42, xs = 0.3, rad = 0.07;
        /* the subject's centre sits on the horizon */
        const double ys = yf - (xs - 0.5) * f.w * tan(deg * M_PI / 180.0) / f.h;
        b_horizon(&f, deg, yf, 4.0);
        for (int y = 0; y < f.h; y++)
            for (int x = 0; x < f.w; x++) {
                double in = 0.5 - (hypot(x + 0.5 - xs * f.w, y + 0.5 - ys * f.h) - rad * f.h);
                if (in <= 0)
                    continue;
                in = in > 1 ? 1 : in;
                uint8_t *p = b_px(&f, x, y);
                for (int c = 0; c < 3; c++)
                    p[c] = b_u8(p[c] * (1 - in) + hull[c] * in);
            }
        coach_reset(a);
        assert_int_equal(coach_analyze(a, &f, 0.0, &r), 0);
        assert_true(r.has_tilt && r.has_horizon);
        assert_true(fabs(r.tilt_deg - deg) <= 0.3);
        assert_true(fabs(r.horizon_y - yf) <= 0.02);
        assert_true(r.has_subject);
        assert_true(hypot((r.subject.x - xs) * f.w, (r.subject.y - ys) * f.h) / hypot(f.w, f.h) <= 0.05);
    }
    free((void *)f.data);
    coach_destroy(a);
}

/* Flat fields, blank frames and noise carry no line: the issue asks for
 * null there, not a guess. */
static void test_level_none_without_lines(void **state)
{
    (void)state;
    coach_analyzer *a = b_analyzer(COACH_GRID_THIRDS);
    static coach_result r;
    coach_frame f = b_frame(960, 540);
    for (int kind = 0; kind < 4; kind++) {
        for (int y = 0; y < f.h; y++)
            for (int x = 0; x < f.w; x++) {
                uint8_t *p = b_px(&f, x, y);
                double v = kind == 0 ? 0 : kind == 1 ? 128 + 40.0 * x / f.w
                         : kind == 2 ? 128 + 60 * (b_rand() - 0.5) : 30 + 50 * (b_rand() - 0.5);
                p[0] = p[1] = p[2] = b_u8(v);
            }
        coach_reset(a);
        assert_int_equal(coach_analyze(a, &f, 0.0, &r), 0);
        assert_false(r.has_tilt);
        assert_false(r.has_horizon);
        if (kind < 2)
            assert_false(r.has_subject);
    }
    free((void *)f.data);
    coach_destroy(a);
}

/* Without a horizon the level comes from upright lines (walls, door
 * frames): panels of different tone spanning the height, the whole scene
 * rolled by deg.  Bound: the 0.5 degree for verticals. */
static void test_level_from_verticals(void **state)
{
    (void)state;
    coach_analyzer *a = b_analyzer(COACH_GRID_THIRDS);
    static coach_result r;
    coach_frame f = b_frame(1280, 720);
    static const double edges[] = {0.12, 0.27, 0.45, 0.58, 0.76, 0.9};
    for (double deg = -8; deg <= 8.01; deg += 2) {
        const double th = deg * M_PI / 180.0, c = cos(th), s = sin(th);
        for (int y = 0; y < f.h; y++)
            for (int x = 0; x < f.w; x++) {
                /* rotate the pixel back into the upright scene */
                double px = x + 0.5 - 0.5 * f.w, py = y + 0.5 - 0.5 * f.h;
                double ux = (c * px - s * py) / f.w + 0.5;
                double v = 90;
                for (int e = 0; e < 6; e++) {
                    double cov = (ux - edges[e]) * f.w + 0.5;
                    cov = cov < 0 ? 0 : cov > 1 ? 1 : cov;
                    v += (e % 2 ? -45 : 60) * cov;
                }
                uint8_t *p = b_px(&f, x, y);
                p[0] = p[1] = p[2] = b_u8(v + 4 * (b_rand() - 0.5));
            }
        coach_reset(a);
        assert_int_equal(coach_analyze(a, &f, 0.0, &r), 0);
        assert_true(r.has_tilt);
        assert_int_equal(r.level_source, COACH_LEVEL_VERTICALS);
        assert_false(r.has_horizon);
        assert_true(fabs(r.tilt_deg - deg) <= 0.5);
    }
    free((void *)f.data);
    coach_destroy(a);
}

/* ---- subject, placement, balance, intrusions ---- */

/* The bound: the subject centre within 5 % of the frame diagonal
 * for a single salient subject on a quiet background, anywhere including
 * near the edges.  Truth: the rendered disc's centre. */
static void test_subject_centre_anywhere(void **state)
{
    (void)state;
    static const uint8_t cols[][3] = {{200, 40, 30}, {30, 40, 50}, {250, 250, 240}, {40, 120, 200}};
    static const double xs[] = {0.07, 0.3, 0.5, 0.72, 0.93}, ys[] = {0.1, 0.45, 0.9};
    coach_analyzer *a = b_analyzer(COACH_GRID_THIRDS);
    static coach_result r;
    double worst = 0;
    int k = 0;
    for (int s = 0; s < 2; s++) {
        coach_frame f = b_frame(s ? 1280 : 640, s ? 720 : 480);
        for (size_t i = 0; i < 5; i++)
            for (size_t j = 0; j < 3; j++, k++) {
                double rf = (k % 3 == 0) ? 0.035 : (k % 3 == 1) ? 0.06 : 0.09;
                double xf = xs[i], yf = ys[j];
                /* keep the disc inside the frame */
                if (xf * f.w < rf * f.h) xf = rf * f.h / f.w;
                if ((1 - xf) * f.w < rf * f.h) xf = 1 - rf * f.h / f.w;
                if (yf < rf) yf = rf;
                if (yf > 1 - rf) yf = 1 - rf;
                b_subject(&f, xf, yf, rf, cols[k % 4]);
                coach_reset(a);
                assert_int_equal(coach_analyze(a, &f, 0.0, &r), 0);
                assert_true(r.has_subject);
                double d = hypot((r.subject.x - xf) * f.w, (r.subject.y - yf) * f.h) / hypot(f.w, f.h);
                worst = d > worst ? d : worst;
                assert_true(d <= 0.05);
                /* the box holds the centre and is not wildly larger than the disc */
                assert_true(r.subject.w > 0 && r.subject.w <= 8 * rf * f.h / f.w);
            }
        free((void *)f.data);
    }
    coach_destroy(a);
    print_message("subject: worst centre error %.4f of the diagonal\n", worst);
}

/* Power points: rule of thirds (common practice) at 1/3 and 2/3; the phi
 * grid at 1/phi^2 and 1/phi of the golden ratio phi = (1 + sqrt 5) / 2.
 * Placement is the distance to the nearest, as a fraction of the diagonal,
 * checked against the geometry of where the subject was put. */
static void test_placement_power_points(void **state)
{
    (void)state;
    static const uint8_t col[3] = {30, 40, 50};
    const double iphi = 2.0 / (1.0 + sqrt(5.0));
    coach_frame f = b_frame(960, 540);
    static coach_result r;
    coach_analyzer *th = b_analyzer(COACH_GRID_THIRDS), *ph = b_analyzer(COACH_GRID_PHI);
    /* at the upper-left third */
    b_subject(&f, 1.0 / 3, 1.0 / 3, 0.06, col);
    assert_int_equal(coach_analyze(th, &f, 0.0, &r), 0);
    assert_true(r.has_subject);
    assert_int_equal(r.placement_point, 0);
    assert_true(r.placement <= 0.02);
    /* at the lower-right phi point: near for phi, 0.048 of the diagonal
     * (the offset 2/3 - 1/phi along both axes) away for thirds */
    b_subject(&f, iphi, iphi, 0.06, col);
    assert_int_equal(coach_analyze(ph, &f, 0.0, &r), 0);
    assert_int_equal(r.placement_point, 3);
    assert_true(r.placement <= 0.02);
    coach_reset(th);
    assert_int_equal(coach_analyze(th, &f, 0.0, &r), 0);
    assert_int_equal(r.placement_point, 3);
    assert_true(fabs(r.placement - (2.0 / 3 - iphi)) <= 0.02);
    /* at the upper-right third */
    b_subject(&f, 2.0 / 3, 0.3, 0.06, col);
    coach_reset(th);
    assert_int_equal(coach_analyze(th, &f, 0.0, &r), 0);
    assert_int_equal(r.placement_point, 1);
    free((void *)f.data);
    coach_destroy(th);
    coach_destroy(ph);
}

/* Balance leans toward the side holding the salient mass (sign convention
 * of coach.h: -1 left/top .. +1 right/bottom); a dark mass cut by the
 * right border is an intrusion on that side, a centred subject or a
 * horizon running out of both sides is none. */
static void test_balance_and_edge_intrusions(void **state)
{
    (void)state;
    static const uint8_t col[3] = {200, 40, 30};
    coach_frame f = b_frame(960, 540);
    static coach_result r;
    coach_analyzer *a = b_analyzer(COACH_GRID_THIRDS);
    b_subject(&f, 0.2, 0.75, 0.07, col);
    assert_int_equal(coach_analyze(a, &f, 0.0, &r), 0);
    assert_true(r.balance_lr < -0.2);
    assert_true(r.balance_tb > 0.2);
    b_subject(&f, 0.5, 0.5, 0.07, col);
    coach_reset(a);
    assert_int_equal(coach_analyze(a, &f, 0.0, &r), 0);
    assert_int_equal(r.edge_intrusions, 0);
    assert_true(fabs(r.balance_lr) < 0.15 && fabs(r.balance_tb) < 0.15);
    /* a disc centred just outside the right edge: half of it shows */
    b_subject(&f, 1.02, 0.45, 0.12, col);
    coach_reset(a);
    assert_int_equal(coach_analyze(a, &f, 0.0, &r), 0);
    assert_true(r.edge_intrusions & COACH_EDGE_RIGHT);
    assert_false(r.edge_intrusions & COACH_EDGE_LEFT);
    /* a horizon meeting both sides is the scene's structure, not an
     * intrusion, tilted or not */
    for (int k = -1; k <= 1; k++) {
        b_horizon(&f, 2.5 * k, 0.4, 4.0);
        coach_reset(a);
        assert_int_equal(coach_analyze(a, &f, 0.0, &r), 0);
        assert_int_equal(r.edge_intrusions, 0);
        assert_false(r.has_subject); /* and no subject made of its ends */
    }
    free((void *)f.data);
    coach_destroy(a);
}

/* ---- steadiness and lead room ---- */

/* A textured scene panned by a known shift per frame at 30 frames per
 * second: the measured global motion is that shift times the rate (ground
 * truth by construction; phase correlation, Kuglin & Hudson 1975).  Within
 * 5 %, or 10 px/s (a third of a full-resolution pixel per frame) for slow
 * pans; a still scene measures under 5 px/s. */
static void test_motion_known_shift(void **state)
{
    (void)state;
    const int w = 1280, h = 720, big = 1600;
    float *tex = malloc((size_t)big * big * sizeof(float));
    assert_non_null(tex);
    for (int y = 0; y < big; y++)
        for (int x = 0; x < big; x++)
            tex[(size_t)y * big + x] = (float)(128 + 50 * sin(x * 0.031 + 2 * sin(y * 0.013)) +
                                               40 * sin(y * 0.023 + x * 0.007) + 10 * (b_rand() - 0.5));
    coach_frame f = b_frame(w, h);
    static coach_result r;
    coach_analyzer *a = b_analyzer(COACH_GRID_THIRDS);
    static const int shifts[][2] = {{0, 0}, {12, -5}, {-30, 8}, {3, 2}};
    for (int s = 0; s < 4; s++) {
        coach_reset(a);
        for (int i = 0; i < 4; i++) {
            int ox = 100 + shifts[s][0] * i, oy = 150 + shifts[s][1] * i;
            for (int y = 0; y < h; y++)
                for (int x = 0; x < w; x++) {
                    /* the camera moves by +shift: content moves by -shift */
                    uint8_t *p = b_px(&f, x, y);
                    p[0] = p[1] = p[2] = b_u8(tex[(size_t)(y + oy) * big + (x + ox)]);
                }
            assert_int_equal(coach_analyze(a, &f, i / 30.0, &r), 0);
        }
        double truth = hypot(shifts[s][0], shifts[s][1]) * 30.0;
        assert_true(r.has_motion);
        if (truth == 0)
            assert_true(r.motion_px_s < 5.0);
        else
            assert_true(fabs(r.motion_px_s - truth) <= fmax(0.05 * truth, 10.0));
    }
    free(tex);
    free((void *)f.data);
    coach_destroy(a);
}

/* Lead room (common practice: leave space in front of a moving subject):
 * a subject crossing a still backdrop sideways, one rising or falling, one
 * the camera pans with; the value is the share of the free width (height)
 * ahead of its box, checked against the rendered geometry.  A slanted path
 * weighs both: heading into the open corner reads above one half, into the
 * near corner below. */
/* Eight frames at 30 fps of the dark disc moving from (x, y) by (dx, dy)
 * frame fractions a frame, analysed from a reset; *r holds the last. */
static void b_lead_track(coach_analyzer *a, const coach_frame *f, double x, double y, double dx,
                         double dy, double rf, coach_result *r)
{
    static const uint8_t col[3] = {30, 40, 50};
    coach_reset(a);
    for (int i = 0; i < 8; i++) {
        b_subject(f, x + dx * i, y + dy * i, rf, col);
        assert_int_equal(coach_analyze(a, f, i / 30.0, r), 0);
    }
}

static void test_lead_room_follows_motion(void **state)
{
    (void)state;
    static const uint8_t col[3] = {30, 40, 50};
    coach_frame f = b_frame(960, 540);
    static coach_result r;
    coach_analyzer *a = b_analyzer(COACH_GRID_THIRDS);
    const double rf = 0.08, half_w = rf * 540 / 960;
    /* sideways (axis 0) and up or down (axis 1), 0.01 of the frame a frame:
     * 0.3 frame widths or heights per second */
    for (int axis = 0; axis < 2; axis++)
        for (int dir = -1; dir <= 1; dir += 2) {
            double p0 = dir > 0 ? 0.3 : 0.7, p = p0 + dir * 0.07; /* last position */
            b_lead_track(a, &f, axis ? 0.5 : p0, axis ? p0 : 0.5, axis ? 0 : dir * 0.01,
                         axis ? dir * 0.01 : 0, rf, &r);
            double half = axis ? rf : rf * 540 / 960, lo = p - half, hi = 1 - (p + half);
            double truth = (dir > 0 ? hi : lo) / (lo + hi);
            assert_true(r.has_lead_room);
            assert_true(truth > 0.6);
            assert_true(fabs(r.lead_room - truth) <= 0.05);
        }
    /* a slanted path from near the upper-left corner down-right, or the
     * same path back up-left */
    b_lead_track(a, &f, 0.22, 0.3, 0.01, 0.01, rf, &r);
    assert_true(r.has_lead_room && r.lead_room > 0.6);
    b_lead_track(a, &f, 0.29, 0.37, -0.01, -0.01, rf, &r);
    assert_true(r.has_lead_room && r.lead_room < 0.4);
    /* panning with the subject: it keeps its place in the frame while the
     * backdrop slides left (the camera turns right), so it moves right */
    {
        const int big = 1400;
        float *tex = malloc((size_t)big * 600 * sizeof(float));
        assert_non_null(tex);
        for (int y = 0; y < 600; y++)
            for (int x = 0; x < big; x++)
                tex[(size_t)y * big + x] = (float)(120 + 40 * sin(x * 0.031 + 2 * sin(y * 0.013)) +
                                                   30 * sin(y * 0.023 + x * 0.007) +
                                                   10 * (b_rand() - 0.5));
        static const uint8_t red[3] = {210, 40, 30};
        coach_reset(a);
        for (int i = 0; i < 10; i++) {
            int ox = 20 + 12 * i; /* 12 px per frame: 0.375 frame widths per second */
            for (int y = 0; y < f.h; y++)
                for (int x = 0; x < f.w; x++) {
                    uint8_t *p = b_px(&f, x, y);
                    double in = 0.5 - (hypot(x + 0.5 - 0.3 * f.w, y + 0.5 - 0.5 * f.h) - rf * f.h);
                    in = in < 0 ? 0 : in > 1 ? 1 : in;
                    double v = tex[(size_t)y * big + x + ox];
                    for (int c = 0; c < 3; c++)
                        p[c] = b_u8(v * (1 - in) + red[c] * in);
                }
            assert_int_equal(coach_analyze(a, &f, i / 30.0, &r), 0);
        }
        assert_true(r.has_subject);
        assert_true(r.has_lead_room);
        double left = 0.3 - half_w, right = 1 - (0.3 + half_w);
        assert_true(fabs(r.lead_room - right / (left + right)) <= 0.05);
        free(tex);
    }
    /* standing still: no direction, no lead room */
    coach_reset(a);
    for (int i = 0; i < 6; i++) {
        b_subject(&f, 0.4, 0.5, rf, col);
        assert_int_equal(coach_analyze(a, &f, i / 30.0, &r), 0);
    }
    assert_false(r.has_lead_room);
    /* the plain backdrop gives the camera's shift nothing to hold on to */
    assert_false(r.has_motion);
    free((void *)f.data);
    coach_destroy(a);
}

/* ---- subject focus ---- */

/* A textured bright disc on a dim textured backdrop; either the subject
 * (with its outline, as out of focus) or the rest is softened by a 5x5 box
 * blur.  The Laplacian variance in the subject box over the whole frame is
 * above 1 when the subject is the sharp part and below when it is not
 * (tests/check_compose.sh compares the value itself with OpenCV's). */
static void test_subject_focus_sharp_or_soft(void **state)
{
    (void)state;
    const int w = 960, h = 540;
    const double cx = 0.4 * w, cy = 0.45 * h, rad = 0.14 * h;
    uint8_t *sc = malloc((size_t)w * h), *soft = malloc((size_t)w * h);
    assert_non_null(sc);
    assert_non_null(soft);
    for (int y = 0; y < h; y++)
        for (int x = 0; x < w; x++) {
            double v = 128 + 90 * (b_rand() - 0.5);
            int in = hypot(x - cx, y - cy) < rad;
            sc[(size_t)y * w + x] = b_u8(in ? 0.5 * v + 120 : 0.3 * v + 15);
        }
    for (int y = 0; y < h; y++)
        for (int x = 0; x < w; x++) {
            int s = 0, n = 0;
            for (int dy = -2; dy <= 2; dy++)
                for (int dx = -2; dx <= 2; dx++) {
                    int xx = x + dx, yy = y + dy;
                    if (xx >= 0 && yy >= 0 && xx < w && yy < h) {
                        s += sc[(size_t)yy * w + xx];
                        n++;
                    }
                }
            soft[(size_t)y * w + x] = (uint8_t)(s / n);
        }
    coach_frame f = b_frame(w, h);
    static coach_result r;
    coach_analyzer *a = b_analyzer(COACH_GRID_THIRDS);
    for (int sharp_subject = 0; sharp_subject <= 1; sharp_subject++) {
        for (int y = 0; y < h; y++)
            for (int x = 0; x < w; x++) {
                double d = hypot(x - cx, y - cy);
                int soft_here = sharp_subject ? d >= rad + 3 : d < rad + 3;
                uint8_t v = (soft_here ? soft : sc)[(size_t)y * w + x];
                uint8_t *p = b_px(&f, x, y);
                p[0] = p[1] = p[2] = v;
            }
        coach_reset(a);
        assert_int_equal(coach_analyze(a, &f, 0.0, &r), 0);
        assert_true(r.has_subject);
        assert_true(r.has_subject_focus);
        if (sharp_subject)
            assert_true(r.subject_focus > 1.5);
        else
            assert_true(r.subject_focus < 0.8);
    }
    free(sc);
    free(soft);
    free((void *)f.data);
    coach_destroy(a);
}

/* ---- robustness ---- */

/* Every frame shape the analyzer accepts, from the smallest to strip-like
 * and portrait ones, gives composition fields within their documented
 * ranges (coach.h) over a few frames, and never reads out of bounds (the
 * asan build runs this too). */
static void test_compose_odd_sizes(void **state)
{
    (void)state;
    static const int sizes[][2] = {{8, 8}, {16, 9}, {33, 700}, {700, 33}, {639, 479},
                                   {480, 640}, {1279, 721}, {2000, 40}};
    static coach_result r;
    for (size_t i = 0; i < sizeof sizes / sizeof sizes[0]; i++) {
        coach_frame f = b_frame(sizes[i][0], sizes[i][1]);
        coach_analyzer *a = b_analyzer(COACH_GRID_PHI);
        for (int k = 0; k < 3; k++) {
            b_horizon(&f, 4.0 - 3 * k, 0.45, 6.0);
            assert_int_equal(coach_analyze(a, &f, k / 30.0, &r), 0);
            if (r.has_horizon)
                assert_true(r.horizon_y >= 0 && r.horizon_y <= 1);
            if (r.has_tilt)
                assert_true(fabs(r.tilt_deg) <= 45 && r.tilt_confidence >= 0 && r.tilt_confidence <= 1);
            if (r.has_subject) {
                assert_true(r.subject.x >= 0 && r.subject.x <= 1 && r.subject.y >= 0 && r.subject.y <= 1);
                assert_true(r.subject.w > 0 && r.subject.w <= 1 && r.subject.h > 0 && r.subject.h <= 1);
                assert_true(r.placement >= 0 && r.placement <= 1);
                assert_true(r.placement_point >= 0 && r.placement_point <= 3);
            }
            if (r.has_lead_room)
                assert_true(r.lead_room >= 0 && r.lead_room <= 1);
            if (r.has_subject_focus)
                assert_true(r.subject_focus >= 0 && isfinite(r.subject_focus));
            assert_true(fabs(r.balance_lr) <= 1 && fabs(r.balance_tb) <= 1);
            assert_true(r.motion_px_s >= 0 && isfinite(r.motion_px_s));
            assert_true(r.edge_intrusions <= 15);
        }
        coach_destroy(a);
        free((void *)f.data);
    }
}

/* ---- internals ---- */

/* The FFT against the DFT's definition, X[k] = sum x[n] exp(-2 pi i k n / N),
 * evaluated directly in double precision, forward and inverse (unscaled). */
static void test_fft2d_matches_dft(void **state)
{
    (void)state;
    enum { W = 16, H = 8 };
    coach_fft_plan px, py;
    assert_int_equal(coach_fft_plan_init(&px, W), 0);
    assert_int_equal(coach_fft_plan_init(&py, H), 0);
    assert_int_equal(coach_fft_plan_init(&px, 12), -1);
    static float data[2 * W * H], orig[2 * W * H], scratch[2 * W * H];
    for (int i = 0; i < 2 * W * H; i++)
        data[i] = orig[i] = (float)(b_rand() * 2 - 1);
    coach_fft2d(&px, &py, data, scratch, 0);
    for (int v = 0; v < H; v++)
        for (int u = 0; u < W; u++) {
            double re = 0, im = 0;
            for (int y = 0; y < H; y++)
                for (int x = 0; x < W; x++) {
                    double a = -2 * M_PI * ((double)u * x / W + (double)v * y / H);
                    double xr = orig[2 * (y * W + x)], xi = orig[2 * (y * W + x) + 1];
                    re += xr * cos(a) - xi * sin(a);
                    im += xr * sin(a) + xi * cos(a);
                }
            assert_true(fabs(data[2 * (v * W + u)] - re) < 1e-3);
            assert_true(fabs(data[2 * (v * W + u) + 1] - im) < 1e-3);
        }
    coach_fft2d(&px, &py, data, scratch, 1);
    for (int i = 0; i < 2 * W * H; i++)
        assert_true(fabs(data[i] / (W * H) - orig[i]) < 1e-4);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        /* ---- section A ---- */
        cmocka_unit_test(test_format_bpp_layouts),
        cmocka_unit_test(test_srgb_decode_iec61966),
        cmocka_unit_test(test_grey18_code118_lstar),
        cmocka_unit_test(test_luma_bt709_weights),
        cmocka_unit_test(test_luma_yuv_matches_rgb),
        cmocka_unit_test(test_luma_bt601_yuv_primaries),
        cmocka_unit_test(test_exposure_whole_stops),
        cmocka_unit_test(test_exposure_stripes_no_alias),
        cmocka_unit_test(test_exposure_demo_one_stop),
        cmocka_unit_test(test_clip_fractions_known),
        cmocka_unit_test(test_colourfulness_hasler_formula),
        cmocka_unit_test(test_colourfulness_word_categories),
        cmocka_unit_test(test_sharpness_laplacian_reflect101),
        cmocka_unit_test(test_tone_simd_matches_portable),
        cmocka_unit_test(test_tone_yuv_simd_matches_portable),
        cmocka_unit_test(test_tone_random_layouts_simd_matches_portable),
        cmocka_unit_test(test_fft2d_simd_matches_portable),
        cmocka_unit_test(test_level_simd_matches_portable),
        cmocka_unit_test(test_score_smoothing_step_response),
        cmocka_unit_test(test_ready_hysteresis_no_flicker),
        cmocka_unit_test(test_score_hints_worst_first),
        cmocka_unit_test(test_score_sharpness_follows_demo_blur),
        cmocka_unit_test(test_score_product_centre_portrait_thirds),
        cmocka_unit_test(test_score_hints_need_points),
        cmocka_unit_test(test_set_profile_keeps_state),
        cmocka_unit_test(test_json_structure_no_nan),
        cmocka_unit_test(test_alloc_steady_state_zero),
        /* ---- section B ---- */
        cmocka_unit_test(test_level_rendered_horizons),
        cmocka_unit_test(test_level_horizon_behind_subject),
        cmocka_unit_test(test_level_none_without_lines),
        cmocka_unit_test(test_level_from_verticals),
        cmocka_unit_test(test_subject_centre_anywhere),
        cmocka_unit_test(test_placement_power_points),
        cmocka_unit_test(test_balance_and_edge_intrusions),
        cmocka_unit_test(test_motion_known_shift),
        cmocka_unit_test(test_lead_room_follows_motion),
        cmocka_unit_test(test_subject_focus_sharp_or_soft),
        cmocka_unit_test(test_compose_odd_sizes),
        cmocka_unit_test(test_fft2d_matches_dft),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
