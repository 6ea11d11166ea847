/* cmocka tests for overlay/.  Several people add tests here at once: add with
 * small insertions (never rewrite the file), each test next to its section's
 * other tests and in the matching section of main()'s list. */
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <setjmp.h>
#include <cmocka.h>

#include <dirent.h>
#include <errno.h>
#include <math.h>
#include <signal.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/resource.h>
#include <sys/stat.h>
#include <sys/wait.h>
#include <time.h>
#include <unistd.h>

#include <SDL_image.h>

#include "coach/app.h"
#include "overlay/overlay.h"
#include "overlay/overlay_internal.h"

/* ==== section A ==== */

/* Everything here renders with SDL's software renderer into a hidden
 * window on the offscreen video driver and asserts on the pixels read back
 * before presenting. */

typedef struct tframe {
    uint32_t *px;
    cap_frame f;
} tframe;

static void tframe_init(tframe *t, int w, int h, uint8_t grey)
{
    t->px = malloc((size_t)w * h * 4);
    assert_non_null(t->px);
    for (size_t i = 0; i < (size_t)w * h; i++)
        t->px[i] = 0xff000000u | (uint32_t)grey * 0x010101u;
    memset(&t->f, 0, sizeof t->f);
    t->f.view.data = (const uint8_t *)t->px;
    t->f.view.w = w;
    t->f.view.h = h;
    t->f.view.stride = w * 4;
    t->f.view.format = COACH_FMT_XRGB8888;
}

static void tframe_set(tframe *t, int x, int y, uint8_t grey)
{
    t->px[(size_t)y * t->f.view.w + x] = 0xff000000u | (uint32_t)grey * 0x010101u;
}

static ovl_window *twin(int ww, int wh, const char *show)
{
    char err[256] = "";
    ovl_opts o = {.width = ww, .height = wh, .hidden = 1, .show = show, .title = "test"};
    ovl_window *w = ovl_create(&o, err, sizeof err);
    if (!w)
        fail_msg("ovl_create: %s", err);
    return w;
}

static SDL_Surface *tdraw(ovl_window *w, tframe *t, const coach_result *r)
{
    assert_int_equal(ovl_draw(w, &t->f, r, NULL), 0);
    SDL_Surface *s = ovl_readback(w);
    assert_non_null(s);
    return s;
}

static uint32_t pix(const SDL_Surface *s, int x, int y)
{
    return ((const uint32_t *)((const uint8_t *)s->pixels + (size_t)y * s->pitch))[x];
}

static int chan(uint32_t p, int c) /* 0 r, 1 g, 2 b */
{
    return (int)(p >> (16 - 8 * c)) & 0xff;
}

static int is_grey(uint32_t p, int v, int tol)
{
    return abs(chan(p, 0) - v) <= tol && abs(chan(p, 1) - v) <= tol && abs(chan(p, 2) - v) <= tol;
}

/* The frame rect computed here independently: scale to fit, centred. */
static void expect_rect(int fw, int fh, int ww, int wh, double *x, double *y, double *w, double *h)
{
    double s = fmin((double)ww / fw, (double)wh / fh);
    *w = fw * s;
    *h = fh * s;
    *x = (ww - *w) / 2;
    *y = (wh - *h) / 2;
}

/* Runs of non-background pixels along a row (dir 0) or column (dir 1);
 * returns how many, their brightest pixel positions in pos[]. */
static int find_lines(const SDL_Surface *s, int fixed, int from, int to, int dir, int bg, int *pos, int maxn)
{
    int n = 0, in = 0, best = -1, bestv = -1;
    for (int i = from; i <= to; i++) {
        uint32_t p = dir ? pix(s, fixed, i) : pix(s, i, fixed);
        int on = !is_grey(p, bg, 3);
        if (on) {
            int v = chan(p, 0) + chan(p, 1) + chan(p, 2);
            if (!in || v > bestv) {
                bestv = v;
                best = i;
            }
            in = 1;
        } else if (in) {
            if (n < maxn)
                pos[n] = best;
            n++;
            in = 0;
            bestv = -1;
        }
    }
    if (in) {
        if (n < maxn)
            pos[n] = best;
        n++;
    }
    return n;
}

/* Rule of thirds: lines at 1/3 and 2/3 of the picture's width and height
 * (common practice; the "rule of thirds" as a name goes back to J. T.
 * Smith, Remarks on Rural Scenery, 1797 - recalled from memory).  Checked
 * at several window sizes, with letterbox and pillarbox bars. */
static void test_guides_thirds_positions(void **state)
{
    (void)state;
    static const int cases[][4] = {
        {1280, 720, 640, 360},  /* exact fit            */
        {1280, 720, 800, 600},  /* letterbox top/bottom */
        {1024, 768, 500, 700},  /* letterbox, portrait  */
        {1500, 1000, 1000, 400}, /* pillarbox           */
        {640, 480, 333, 251},   /* odd sizes            */
        {1920, 1080, 1600, 900},
    };
    for (size_t c = 0; c < sizeof cases / sizeof cases[0]; c++) {
        int fw = cases[c][0], fh = cases[c][1], ww = cases[c][2], wh = cases[c][3];
        tframe t;
        tframe_init(&t, fw, fh, 128);
        ovl_window *w = twin(ww, wh, "thirds");
        SDL_Surface *s = tdraw(w, &t, NULL);
        assert_int_equal(s->w, ww);
        double x0, y0, rw, rh;
        expect_rect(fw, fh, ww, wh, &x0, &y0, &rw, &rh);
        /* bars outside the frame, the frame's grey inside */
        if (x0 >= 2)
            assert_false(is_grey(pix(s, 0, wh / 2), 128, 20));
        if (y0 >= 2)
            assert_false(is_grey(pix(s, ww / 2, 0), 128, 20));
        assert_true(is_grey(pix(s, (int)(x0 + rw / 6), (int)(y0 + rh / 6)), 128, 1));
        int pos[8];
        int row = (int)(y0 + rh / 6);
        int n = find_lines(s, row, (int)ceil(x0) + 2, (int)(x0 + rw) - 3, 0, 128, pos, 8);
        assert_int_equal(n, 2);
        assert_true(fabs(pos[0] - (x0 + rw / 3)) <= 1.0);
        assert_true(fabs(pos[1] - (x0 + 2 * rw / 3)) <= 1.0);
        int col = (int)(x0 + rw / 6);
        n = find_lines(s, col, (int)ceil(y0) + 2, (int)(y0 + rh) - 3, 1, 128, pos, 8);
        assert_int_equal(n, 2);
        assert_true(fabs(pos[0] - (y0 + rh / 3)) <= 1.0);
        assert_true(fabs(pos[1] - (y0 + 2 * rh / 3)) <= 1.0);
        SDL_FreeSurface(s);
        ovl_destroy(w);
        free(t.px);
    }
}

/* Phi grid: lines at 1/phi^2 = 0.381966 and 1/phi = 0.618034 of each side,
 * phi = (1 + sqrt 5) / 2 (Euclid, Elements VI def. 3, the extreme and mean
 * ratio). */
static void test_guides_phi_positions(void **state)
{
    (void)state;
    tframe t;
    tframe_init(&t, 1280, 720, 128);
    ovl_window *w = twin(960, 540, "phi");
    SDL_Surface *s = tdraw(w, &t, NULL);
    double phi = (1 + sqrt(5.0)) / 2;
    int pos[8];
    int n = find_lines(s, 30, 2, 957, 0, 128, pos, 8);
    assert_int_equal(n, 2);
    assert_true(fabs(pos[0] - 960 / (phi * phi)) <= 1.0);
    assert_true(fabs(pos[1] - 960 / phi) <= 1.0);
    n = find_lines(s, 30, 2, 537, 1, 128, pos, 8);
    assert_int_equal(n, 2);
    assert_true(fabs(pos[0] - 540 / (phi * phi)) <= 1.0);
    assert_true(fabs(pos[1] - 540 / phi) <= 1.0);
    SDL_FreeSurface(s);
    ovl_destroy(w);
    free(t.px);
}

/* Least-squares slope of the bright core pixels of the horizon between
 * 25 % and 75 % of the frame width; returns the angle in degrees, + when
 * the right end is higher (the coach's sign convention, coach.h). */
static double fit_angle(const SDL_Surface *s, int x0, int x1, int want_level, int *count)
{
    double sx = 0, sy = 0, sxx = 0, sxy = 0;
    int n = 0;
    for (int y = 0; y < s->h; y++)
        for (int x = x0; x <= x1; x++) {
            uint32_t p = pix(s, x, y);
            int r = chan(p, 0), b = chan(p, 2);
            int hit = want_level ? (b > 200 && r < 160) : (r > 200 && b > 180);
            if (!hit)
                continue;
            sx += x;
            sy += y;
            sxx += (double)x * x;
            sxy += (double)x * y;
            n++;
        }
    *count = n;
    if (n < 10)
        return NAN;
    double slope = (n * sxy - sx * sy) / (n * sxx - sx * sx);
    return -atan(slope) * 180.0 / M_PI; /* screen y runs down */
}

/* The level line leans by the measured roll; within +-0.5 degrees it takes
 * the distinct level look (sky blue, heavy) - a threshold of our own. */
static void test_guides_horizon_angle(void **state)
{
    (void)state;
    static const double rolls[] = {-12.0, -4.0, -0.8, 2.5, 9.0, 0.3, -0.45, 0.0};
    for (size_t i = 0; i < sizeof rolls / sizeof rolls[0]; i++) {
        tframe t;
        tframe_init(&t, 1280, 720, 128);
        ovl_window *w = twin(800, 450, "horizon");
        coach_result r;
        memset(&r, 0, sizeof r);
        r.has_tilt = 1;
        r.tilt_deg = rolls[i];
        SDL_Surface *s = tdraw(w, &t, &r);
        int level = fabs(rolls[i]) <= 0.5;
        int n_level, n_ink;
        double a_level = fit_angle(s, 200, 600, 1, &n_level);
        double a_ink = fit_angle(s, 200, 600, 0, &n_ink);
        if (level) {
            assert_true(n_level > 400);
            assert_true(n_ink < 10);
            assert_true(fabs(a_level - rolls[i]) <= 0.15);
        } else {
            assert_true(n_level < 10);
            assert_true(n_ink > 100);
            assert_true(fabs(a_ink - rolls[i]) <= 0.25);
        }
        /* no line without a measurement */
        r.has_tilt = 0;
        SDL_FreeSurface(s);
        s = tdraw(w, &t, &r);
        a_ink = fit_angle(s, 200, 600, 0, &n_ink);
        a_level = fit_angle(s, 200, 600, 1, &n_level);
        assert_true(n_ink < 10 && n_level < 10);
        SDL_FreeSurface(s);
        ovl_destroy(w);
        free(t.px);
    }
}

/* Changed pixels between two renders (guide on vs off). */
static SDL_Surface *render_show(int ww, int wh, tframe *t, const char *show)
{
    ovl_window *w = twin(ww, wh, show);
    SDL_Surface *s = tdraw(w, t, NULL);
    ovl_destroy(w);
    return s;
}

/* Zebras only where luma >= 250 (the coach's clip threshold, coach.h;
 * BT.709 luma weights, ITU-R BT.709-6): a white block gets stripes, a block
 * at 245 and the grey rest get none. */
static void test_readouts_zebras_only_clipped(void **state)
{
    (void)state;
    tframe t;
    tframe_init(&t, 640, 360, 128);
    for (int y = 100; y < 220; y++)
        for (int x = 200; x < 360; x++)
            tframe_set(&t, x, y, 255);
    for (int y = 100; y < 220; y++)
        for (int x = 420; x < 560; x++)
            tframe_set(&t, x, y, 245);
    SDL_Surface *off = render_show(640, 360, &t, "none");
    SDL_Surface *on = render_show(640, 360, &t, "zebras");
    long inside = 0, outside = 0;
    for (int y = 0; y < 360; y++)
        for (int x = 0; x < 640; x++) {
            if (pix(on, x, y) == pix(off, x, y))
                continue;
            if (x >= 199 && x <= 360 && y >= 99 && y <= 220)
                inside++;
            else
                outside++;
        }
    assert_int_equal(outside, 0);
    /* stripes cover about half the clipped area */
    assert_true(inside > 160 * 120 * 3 / 10 && inside < 160 * 120 * 7 / 10);
    SDL_FreeSurface(on);
    SDL_FreeSurface(off);
    free(t.px);
}

/* Focus peaking marks a sharp step (60 | 190) and nothing on a smooth ramp
 * of the same contrast: peaking responds to local gradient, which is what
 * separates sharp from soft (common practice). */
static void test_readouts_peaking_only_edges(void **state)
{
    (void)state;
    tframe t;
    tframe_init(&t, 640, 360, 60);
    for (int y = 0; y < 360; y++)
        for (int x = 0; x < 640; x++) {
            uint8_t v = y < 180 ? (x < 320 ? 60 : 190) : (uint8_t)(60 + 130 * x / 639);
            tframe_set(&t, x, y, v);
        }
    SDL_Surface *off = render_show(640, 360, &t, "none");
    SDL_Surface *on = render_show(640, 360, &t, "peaking");
    long stray = 0;
    int rows_marked = 0;
    for (int y = 0; y < 360; y++) {
        int marked = 0;
        for (int x = 0; x < 640; x++) {
            if (pix(on, x, y) == pix(off, x, y))
                continue;
            int near_step = y < 182 && abs(x - 320) <= 2;
            int near_seam = abs(y - 180) <= 2; /* where the ramp meets the top half: a real edge */
            if (near_step)
                marked = 1;
            else if (!near_seam)
                stray++;
        }
        if (y >= 10 && y < 170)
            rows_marked += marked;
    }
    assert_int_equal(stray, 0);
    assert_true(rows_marked >= 150);
    SDL_FreeSurface(on);
    SDL_FreeSurface(off);
    free(t.px);
}

/* Crop masks keep a centred area of the named width:height - 1:1, 4:5
 * (8x10 inch print, common practice), 3:2 (the 36x24 mm frame of 135
 * film, recalled from memory), 16:9 (ITU-R BT.709 picture aspect). */
static void test_guides_crop_ratio(void **state)
{
    (void)state;
    static const struct { const char *show; double ratio; } c[] = {
        {"crop:1:1", 1.0}, {"crop:4:5", 0.8}, {"crop:3:2", 1.5}, {"crop:16:9", 16.0 / 9.0},
    };
    static const int sizes[][4] = {{1280, 720, 800, 450}, {1024, 768, 700, 700}};
    for (size_t k = 0; k < 2; k++)
        for (size_t i = 0; i < 4; i++) {
            int fw = sizes[k][0], fh = sizes[k][1], ww = sizes[k][2], wh = sizes[k][3];
            tframe t;
            tframe_init(&t, fw, fh, 128);
            SDL_Surface *s = render_show(ww, wh, &t, c[i].show);
            double x0, y0, rw, rh;
            expect_rect(fw, fh, ww, wh, &x0, &y0, &rw, &rh);
            int cx = (int)(x0 + rw / 2), cy = (int)(y0 + rh / 2);
            int l = cx, r = cx, u = cy, d = cy;
            while (l > 0 && is_grey(pix(s, l - 1, cy), 128, 2))
                l--;
            while (r < ww - 1 && is_grey(pix(s, r + 1, cy), 128, 2))
                r++;
            while (u > 0 && is_grey(pix(s, cx, u - 1), 128, 2))
                u--;
            while (d < wh - 1 && is_grey(pix(s, cx, d + 1), 128, 2))
                d++;
            double kw = r - l + 1, kh = d - u + 1;
            /* the kept area is the largest of that ratio inside the frame */
            double ew = fmin(rw, rh * c[i].ratio), eh = fmin(rh, rw / c[i].ratio);
            assert_true(fabs(kw - ew) <= 2.0);
            assert_true(fabs(kh - eh) <= 2.0);
            assert_true(fabs(kw / kh - c[i].ratio) / c[i].ratio < 0.01);
            /* and outside it, the frame is darkened */
            if (ew < rw - 4)
                assert_true(chan(pix(s, (int)x0 + 1, cy), 0) < 100);
            if (eh < rh - 4)
                assert_true(chan(pix(s, cx, (int)y0 + 1), 0) < 100);
            SDL_FreeSurface(s);
            free(t.px);
        }
}

static char *tmpdir_make(void);

/* Camera layouts: YUYV and NV12 frames show with BT.601 narrow-range
 * decoding (ITU-R BT.601-7: Y' 16..235, so Y' = 126 is code 128 in RGB
 * within rounding) and zebras mark Y' = 235, which is white (luma 255). */
static void test_readouts_yuv_frames(void **state)
{
    (void)state;
    int fw = 320, fh = 180;
    uint8_t *yuyv = malloc((size_t)fw * fh * 2), *nv12 = malloc((size_t)fw * fh * 3 / 2);
    assert_non_null(yuyv);
    assert_non_null(nv12);
    for (int y = 0; y < fh; y++)
        for (int x = 0; x < fw; x++) {
            uint8_t Y = (x >= 100 && x < 200 && y >= 60 && y < 120) ? 235 : 126;
            yuyv[(size_t)y * fw * 2 + 2 * x] = Y;
            yuyv[(size_t)y * fw * 2 + 2 * x + 1] = 128;
            nv12[(size_t)y * fw + x] = Y;
        }
    memset(nv12 + (size_t)fw * fh, 128, (size_t)fw * fh / 2);
    for (int k = 0; k < 2; k++) {
        cap_frame f;
        memset(&f, 0, sizeof f);
        f.view.data = k ? nv12 : yuyv;
        f.view.w = fw;
        f.view.h = fh;
        f.view.stride = k ? fw : fw * 2;
        f.view.format = k ? COACH_FMT_NV12 : COACH_FMT_YUYV;
        f.view.matrix = COACH_MATRIX_BT601;
        f.view.range = COACH_RANGE_LIMITED;
        /* shown at twice the size: the marks still cover source pixels */
        ovl_window *off = twin(2 * fw, 2 * fh, "none"), *on = twin(2 * fw, 2 * fh, "zebras");
        assert_int_equal(ovl_draw(off, &f, NULL, NULL), 0);
        assert_int_equal(ovl_draw(on, &f, NULL, NULL), 0);
        SDL_Surface *a = ovl_readback(off), *b = ovl_readback(on);
        assert_non_null(a);
        assert_non_null(b);
        assert_true(is_grey(pix(a, 40, 40), 128, 3));
        assert_true(is_grey(pix(a, 300, 180), 255, 3));
        long inside = 0, outside = 0;
        for (int y = 0; y < 2 * fh; y++)
            for (int x = 0; x < 2 * fw; x++)
                if (pix(a, x, y) != pix(b, x, y)) {
                    if (x >= 198 && x < 402 && y >= 118 && y < 242)
                        inside++;
                    else
                        outside++;
                }
        assert_int_equal(outside, 0);
        assert_true(inside > 200 * 120 / 4);
        SDL_FreeSurface(a);
        SDL_FreeSurface(b);
        ovl_destroy(off);
        ovl_destroy(on);
    }
    free(yuyv);
    free(nv12);
}

/* The RGB histogram of a camera frame decodes Y'CbCr: 100 % colour bars
 * in BT.601 narrow range are red Y'81 Cb90 Cr240, green Y'145 Cb54 Cr34,
 * blue Y'41 Cb240 Cr110 (ITU-R BT.601 colour bar values, recalled from
 * memory; they follow from the BT.601-7 matrix). */
static void test_readouts_rgb_histogram_yuv(void **state)
{
    (void)state;
    static const int bar[3][3] = {{81, 90, 240}, {145, 54, 34}, {41, 240, 110}};
    int fw = 64, fh = 48;
    uint8_t *yuyv = malloc((size_t)fw * fh * 2);
    assert_non_null(yuyv);
    ovl_window *w = twin(640, 360, "histogram-rgb");
    for (int c = 0; c < 3; c++) {
        for (int i = 0; i < fw * fh / 2; i++) {
            yuyv[4 * i] = yuyv[4 * i + 2] = (uint8_t)bar[c][0];
            yuyv[4 * i + 1] = (uint8_t)bar[c][1];
            yuyv[4 * i + 3] = (uint8_t)bar[c][2];
        }
        coach_frame f = {.data = yuyv, .w = fw, .h = fh, .stride = fw * 2, .format = COACH_FMT_YUYV,
                         .matrix = COACH_MATRIX_BT601, .range = COACH_RANGE_LIMITED};
        ovl_update_hist_rgb(w, &f);
        assert_true(w->hist_rgb_total > 100);
        for (int ch = 0; ch < 3; ch++) {
            uint64_t near = 0;
            int want = ch == c ? 255 : 0;
            for (int b = 0; b < 256; b++)
                if (abs(b - want) <= 2)
                    near += w->hist_rgb[ch][b];
            assert_int_equal(near, w->hist_rgb_total);
        }
    }
    ovl_destroy(w);
    free(yuyv);
}

/* Mirrored, "left" on screen is the picture's right (a mirror swaps
 * left and right, nothing else): side words in hints swap, whole words
 * only, and turning directions stay. */
static void test_text_mirror_words(void **state)
{
    (void)state;
    char out[COACH_HINT_LEN];
    ovl_mirror_words("Move the subject toward the upper-left third", out, sizeof out);
    assert_string_equal(out, "Move the subject toward the upper-right third");
    ovl_mirror_words("Right edge: leave room on the left; rightly, leftover", out, sizeof out);
    assert_string_equal(out, "Left edge: leave room on the right; rightly, leftover");
    ovl_mirror_words("Rotate 2.1° clockwise", out, sizeof out);
    assert_string_equal(out, "Rotate 2.1° clockwise");
}

static ovl_action key(ovl_window *w, SDL_Keycode k)
{
    SDL_Event e;
    memset(&e, 0, sizeof e);
    e.type = SDL_KEYDOWN;
    e.key.keysym.sym = k;
    return ovl_handle_event(w, &e);
}

/* The key map (our own, listed in the help overlay): the spiral key turns
 * the spiral through its four orientations then hides it, the crop key
 * walks 1:1, 4:5, 3:2, 16:9, off; Esc closes the help before it quits;
 * presenter mode keeps one guide at a time. */
static void test_keys_map(void **state)
{
    (void)state;
    ovl_window *w = twin(640, 360, "none");
    for (int i = 0; i < 4; i++) {
        assert_int_equal(key(w, SDLK_4), OVL_ACT_NONE);
        assert_true(w->guide[OVL_G_SPIRAL]);
        assert_int_equal(w->spiral_orient, i);
    }
    key(w, SDLK_4);
    assert_false(w->guide[OVL_G_SPIRAL]);
    for (int i = 1; i < OVL_CROP_COUNT; i++) {
        key(w, SDLK_7);
        assert_int_equal(w->crop, i);
        assert_true(w->guide[OVL_G_CROP]);
    }
    key(w, SDLK_7);
    assert_int_equal(w->crop, 0);
    assert_false(w->guide[OVL_G_CROP]);
    key(w, SDLK_1);
    key(w, SDLK_2);
    assert_true(w->guide[OVL_G_THIRDS] && w->guide[OVL_G_PHI]);
    key(w, SDLK_0);
    assert_false(w->guide[OVL_G_THIRDS] || w->guide[OVL_G_PHI]);
    assert_int_equal(key(w, SDLK_s), OVL_ACT_SNAPSHOT);
    assert_int_equal(key(w, SDLK_SPACE), OVL_ACT_SNAPSHOT);
    assert_int_equal(key(w, SDLK_p), OVL_ACT_NEXT_PROFILE);
    key(w, SDLK_l);
    assert_int_equal(w->hist_mode, 1);
    key(w, SDLK_l);
    assert_int_equal(w->hist_mode, 2);
    key(w, SDLK_l);
    assert_int_equal(w->hist_mode, 0);
    key(w, SDLK_m);
    assert_true(ovl_mirrored(w));
    key(w, SDLK_h);
    assert_true(w->help);
    assert_int_equal(key(w, SDLK_ESCAPE), OVL_ACT_NONE);
    assert_false(w->help);
    assert_int_equal(key(w, SDLK_ESCAPE), OVL_ACT_QUIT);
    assert_int_equal(key(w, SDLK_q), OVL_ACT_QUIT);
    ovl_destroy(w);

    char err[256];
    ovl_opts o = {.width = 640, .height = 360, .hidden = 1, .presenter = 1, .show = "thirds,phi,meter"};
    w = ovl_create(&o, err, sizeof err);
    if (!w)
        fail_msg("%s", err);
    /* presenter: the first guide asked for, alone, and its name shown */
    assert_true(w->guide[OVL_G_THIRDS]);
    assert_false(w->guide[OVL_G_PHI]);
    assert_int_equal(w->present_guide, OVL_G_THIRDS);
    key(w, SDLK_3);
    assert_true(w->guide[OVL_G_DIAGONALS]);
    assert_false(w->guide[OVL_G_THIRDS]);
    key(w, SDLK_TAB);
    int on = 0;
    for (int i = 0; i < OVL_G_COUNT; i++)
        on += w->guide[i] != 0;
    assert_int_equal(on, 1);
    assert_true(w->guide[OVL_G_SPIRAL]);
    ovl_destroy(w);
}

/* Mirrored, the level line leans the other way (the picture is flipped
 * left-right), and a lost source dims the last frame. */
static void test_guides_mirror_and_lost(void **state)
{
    (void)state;
    tframe t;
    tframe_init(&t, 1280, 720, 128);
    char err[256];
    ovl_opts o = {.width = 800, .height = 450, .hidden = 1, .show = "horizon", .mirror = 1};
    ovl_window *w = ovl_create(&o, err, sizeof err);
    assert_non_null(w);
    assert_true(ovl_mirrored(w));
    coach_result r;
    memset(&r, 0, sizeof r);
    r.has_tilt = 1;
    r.tilt_deg = 6.0;
    SDL_Surface *s = tdraw(w, &t, &r);
    int n;
    double a = fit_angle(s, 200, 600, 0, &n);
    assert_true(n > 100);
    assert_true(fabs(a + 6.0) <= 0.25);
    SDL_FreeSurface(s);
    ovl_status st;
    memset(&st, 0, sizeof st);
    st.source_lost = 1;
    st.message = "Camera unplugged";
    assert_int_equal(ovl_draw(w, NULL, &r, &st), 0);
    s = ovl_readback(w);
    assert_non_null(s);
    /* a corner of the frame, away from the message: dimmed */
    assert_true(chan(pix(s, 10, 440), 0) < 90);
    SDL_FreeSurface(s);
    ovl_destroy(w);
    free(t.px);
}

/* With no font at all, the window says so (fontconfig reads the
 * configuration named by FONTCONFIG_FILE; an empty one lists no fonts). */
static void test_text_no_font_error(void **state)
{
    (void)state;
    char *dir = tmpdir_make();
    char conf[600];
    snprintf(conf, sizeof conf, "%s/fonts.conf", dir);
    FILE *fp = fopen(conf, "w");
    assert_non_null(fp);
    fputs("<?xml version=\"1.0\"?>\n<fontconfig></fontconfig>\n", fp);
    fclose(fp);
    char *old = getenv("FONTCONFIG_FILE") ? strdup(getenv("FONTCONFIG_FILE")) : NULL;
    setenv("FONTCONFIG_FILE", conf, 1);
    char buf[512], err[256] = "";
    int rc = ovl_font_find(buf, sizeof buf, err, sizeof err);
    if (old)
        setenv("FONTCONFIG_FILE", old, 1);
    else
        unsetenv("FONTCONFIG_FILE");
    free(old);
    assert_int_equal(rc, -ENOENT);
    assert_non_null(strstr(err, "font"));
    /* and with the system configuration one is found */
    assert_int_equal(ovl_font_find(buf, sizeof buf, err, sizeof err), 0);
    assert_int_equal(access(buf, R_OK), 0);
    unlink(conf);
    rmdir(dir);
    free(dir);
}

/* ---- snapshots ---------------------------------------------------------- */

static char *tmpdir_make(void)
{
    char *d = strdup("/tmp/vfcoach-test-XXXXXX");
    assert_non_null(d);
    assert_non_null(mkdtemp(d));
    return d;
}

static int dir_count(const char *dir)
{
    DIR *d = opendir(dir);
    if (!d)
        return -1;
    int n = 0;
    struct dirent *e;
    while ((e = readdir(d)))
        if (strcmp(e->d_name, ".") && strcmp(e->d_name, ".."))
            n++;
    closedir(d);
    return n;
}

static void rm_tree(const char *dir)
{
    DIR *d = opendir(dir);
    if (d) {
        struct dirent *e;
        char p[1024];
        while ((e = readdir(d)))
            if (strcmp(e->d_name, ".") && strcmp(e->d_name, "..")) {
                snprintf(p, sizeof p, "%s/%s", dir, e->d_name);
                if (unlink(p))
                    rm_tree(p);
            }
        closedir(d);
    }
    rmdir(dir);
}

static char *slurp(const char *path)
{
    FILE *fp = fopen(path, "r");
    if (!fp)
        return NULL;
    static char buf[65536];
    size_t n = fread(buf, 1, sizeof buf - 1, fp);
    buf[n] = 0;
    fclose(fp);
    return buf;
}

static void pattern_frame(tframe *t, int w, int h)
{
    tframe_init(t, w, h, 0);
    for (int y = 0; y < h; y++)
        for (int x = 0; x < w; x++)
            t->px[(size_t)y * w + x] = 0xff000000u | (uint32_t)((x * 255 / w) << 16) |
                                      (uint32_t)((y * 255 / h) << 8) | (uint32_t)((x ^ y) & 0xff);
}

/* PNG is lossless (ISO/IEC 15948): the saved image reads back pixel for
 * pixel; the sidecar is JSON (RFC 8259) carrying the measurements. */
static void test_snapshot_roundtrip(void **state)
{
    (void)state;
    char *dir = tmpdir_make();
    char sub[512];
    snprintf(sub, sizeof sub, "%s/shots/today", dir); /* created on demand */
    tframe t;
    pattern_frame(&t, 320, 200);
    coach_config cfg;
    coach_config_default(&cfg);
    coach_analyzer *an = coach_create(&cfg);
    assert_non_null(an);
    coach_result r;
    assert_int_equal(coach_analyze(an, &t.f.view, 0.0, &r), 0);
    char path[1024], err[256];
    int rc = app_snap_save(sub, &t.f.view, &r, COACH_PROFILE_PORTRAIT, "test \"pattern\"", 0, path, sizeof path,
                           err, sizeof err);
    if (rc)
        fail_msg("%s", err);
    assert_int_equal(dir_count(sub), 2);
    struct stat st;
    assert_int_equal(stat(sub, &st), 0);
    assert_int_equal(st.st_mode & 0777, 0700);
    SDL_Surface *img = IMG_Load(path);
    assert_non_null(img);
    SDL_Surface *rgb = SDL_ConvertSurfaceFormat(img, SDL_PIXELFORMAT_XRGB8888, 0);
    assert_non_null(rgb);
    assert_int_equal(rgb->w, 320);
    assert_int_equal(rgb->h, 200);
    long diff = 0;
    for (int y = 0; y < 200; y++)
        for (int x = 0; x < 320; x++)
            diff += (pix(rgb, x, y) & 0xffffff) != (t.px[(size_t)y * 320 + x] & 0xffffff);
    assert_int_equal(diff, 0);
    SDL_FreeSurface(rgb);
    SDL_FreeSurface(img);
    /* the sidecar: same name, .json */
    char side[1100];
    snprintf(side, sizeof side, "%.*s.json", (int)(strlen(path) - 4), path);
    char *j = slurp(side);
    assert_non_null(j);
    size_t n = strlen(j);
    assert_true(n > 40 && j[0] == '{' && j[n - 2] == '}' && j[n - 1] == '\n');
    int depth = 0, instr = 0, minus = 0;
    for (size_t i = 0; i < n; i++) {
        if (instr) {
            if (j[i] == '\\')
                i++;
            else if (j[i] == '"')
                instr = 0;
        } else if (j[i] == '"')
            instr = 1;
        else if (j[i] == '{' || j[i] == '[')
            depth++;
        else if (j[i] == '}' || j[i] == ']')
            minus |= --depth < 0;
    }
    assert_int_equal(depth, 0);
    assert_false(minus);
    assert_non_null(strstr(j, "\"profile\":\"portrait\""));
    assert_non_null(strstr(j, "\"source\":\"test \\\"pattern\\\"\""));
    assert_non_null(strstr(j, "\"exposure_ev\":"));
    assert_non_null(strstr(j, "\"measurements\":{"));
    const char *base = strrchr(path, '/') + 1;
    char key[300];
    snprintf(key, sizeof key, "\"image\":\"%s\"", base);
    assert_non_null(strstr(j, key));
    /* ISO 8601 extended: YYYY-MM-DDThh:mm:ss.sss+hh:mm */
    const char *tm = strstr(j, "\"time\":\"");
    assert_non_null(tm);
    tm += 8;
    assert_true(strlen(tm) > 29 && tm[4] == '-' && tm[7] == '-' && tm[10] == 'T' && tm[13] == ':' &&
                tm[19] == '.' && (tm[23] == '+' || tm[23] == '-') && tm[26] == ':');
    /* a second snapshot in the same millisecond never replaces the first */
    char path2[1024];
    assert_int_equal(app_snap_save(sub, &t.f.view, &r, COACH_PROFILE_PORTRAIT, "x", 1, path2, sizeof path2, err,
                                   sizeof err), 0);
    assert_string_not_equal(path, path2);
    assert_int_equal(dir_count(sub), 4);
    img = IMG_Load(path2);
    assert_non_null(img);
    assert_int_equal(img->w, 320);
    SDL_FreeSurface(img);
    coach_destroy(an);
    free(t.px);
    rm_tree(sub);
    snprintf(sub, sizeof sub, "%s/shots", dir);
    rmdir(sub);
    rm_tree(dir);
    free(dir);
}

/* A write that fails part-way (the file size limit, RLIMIT_FSIZE, POSIX
 * setrlimit) or a folder that cannot be written leaves nothing behind. */
static void test_snapshot_failed_write_leaves_nothing(void **state)
{
    (void)state;
    char *dir = tmpdir_make();
    tframe t;
    tframe_init(&t, 640, 480, 0);
    unsigned s = 12345;
    for (size_t i = 0; i < 640 * 480; i++) {
        s = s * 1103515245u + 12345u;
        t.px[i] = 0xff000000u | (s >> 8);
    }
    coach_result r;
    memset(&r, 0, sizeof r);
    r.width = 640;
    r.height = 480;
    char path[1024] = "x", err[256] = "";
    struct rlimit old, lim;
    assert_int_equal(getrlimit(RLIMIT_FSIZE, &old), 0);
    void (*prev)(int) = signal(SIGXFSZ, SIG_IGN);
    lim = old;
    lim.rlim_cur = 20000; /* the noisy PNG is ~900 kB */
    assert_int_equal(setrlimit(RLIMIT_FSIZE, &lim), 0);
    int rc = app_snap_save(dir, &t.f.view, &r, COACH_PROFILE_LANDSCAPE, "noise", 0, path, sizeof path, err,
                           sizeof err);
    setrlimit(RLIMIT_FSIZE, &old);
    signal(SIGXFSZ, prev);
    assert_true(rc < 0);
    assert_true(strlen(err) > 10);
    assert_string_equal(path, "");
    assert_int_equal(dir_count(dir), 0);

    /* a folder below a regular file cannot exist */
    char file[600], sub[700];
    snprintf(file, sizeof file, "%s/plain", dir);
    FILE *fp = fopen(file, "w");
    assert_non_null(fp);
    fclose(fp);
    snprintf(sub, sizeof sub, "%s/sub", file);
    rc = app_snap_save(sub, &t.f.view, &r, COACH_PROFILE_LANDSCAPE, "noise", 0, path, sizeof path, err, sizeof err);
    assert_int_equal(rc, -ENOTDIR);
    assert_non_null(strstr(err, sub));
    assert_int_equal(dir_count(dir), 1);
    unlink(file);

    /* a read-only folder (meaningless for root, who may write anyway) */
    if (geteuid() != 0) {
        chmod(dir, 0500);
        rc = app_snap_save(dir, &t.f.view, &r, COACH_PROFILE_LANDSCAPE, "noise", 0, path, sizeof path, err,
                           sizeof err);
        chmod(dir, 0700);
        assert_int_equal(rc, -EACCES);
        assert_int_equal(dir_count(dir), 0);
    }
    rm_tree(dir);
    free(dir);
    free(t.px);
}

/* XDG base directory / xdg-user-dirs: XDG_PICTURES_DIR in
 * $XDG_CONFIG_HOME/user-dirs.dirs, "$HOME/..." form; else ~/Pictures. */
static void test_snapshot_default_dir(void **state)
{
    (void)state;
    char *dir = tmpdir_make();
    char *old_home = getenv("HOME") ? strdup(getenv("HOME")) : NULL;
    char *old_cfg = getenv("XDG_CONFIG_HOME") ? strdup(getenv("XDG_CONFIG_HOME")) : NULL;
    setenv("HOME", dir, 1);
    setenv("XDG_CONFIG_HOME", dir, 1);
    char buf[1024], want[1024];
    assert_int_equal(app_snap_default_dir(buf, sizeof buf), 0);
    snprintf(want, sizeof want, "%s/Pictures/vfcoach", dir);
    assert_string_equal(buf, want);
    char f[600];
    snprintf(f, sizeof f, "%s/user-dirs.dirs", dir);
    FILE *fp = fopen(f, "w");
    assert_non_null(fp);
    fputs("# written by a test\nXDG_DESKTOP_DIR=\"$HOME/Desktop\"\nXDG_PICTURES_DIR=\"$HOME/Bilder\"\n", fp);
    fclose(fp);
    assert_int_equal(app_snap_default_dir(buf, sizeof buf), 0);
    snprintf(want, sizeof want, "%s/Bilder/vfcoach", dir);
    assert_string_equal(buf, want);
    unlink(f);
    rmdir(dir);
    if (old_home)
        setenv("HOME", old_home, 1);
    if (old_cfg)
        setenv("XDG_CONFIG_HOME", old_cfg, 1);
    else
        unsetenv("XDG_CONFIG_HOME");
    free(old_home);
    free(old_cfg);
    free(dir);
}

/* Word splitting per POSIX.1-2017 Shell Command Language 2.2 (quoting):
 * single quotes keep everything, double quotes keep all but \ before
 * $ ` " \ newline, a backslash outside quotes keeps the next character. */
static void test_hook_split_quotes(void **state)
{
    (void)state;
    char *argv[8], store[256], err[200];
    int n = app_hook_split("  a 'b c' \"d \\\"e\\\" \\$f \\n\" g\\ h ''", argv, 8, store, sizeof store, err,
                           sizeof err);
    assert_int_equal(n, 5);
    assert_string_equal(argv[0], "a");
    assert_string_equal(argv[1], "b c");
    assert_string_equal(argv[2], "d \"e\" $f \\n");
    assert_string_equal(argv[3], "g h");
    assert_string_equal(argv[4], "");
    assert_null(argv[5]);
    assert_int_equal(app_hook_split("x 'open", argv, 8, store, sizeof store, err, sizeof err), -EINVAL);
    assert_int_equal(app_hook_split("x \"open", argv, 8, store, sizeof store, err, sizeof err), -EINVAL);
    assert_int_equal(app_hook_split("x \\", argv, 8, store, sizeof store, err, sizeof err), -EINVAL);
    assert_int_equal(app_hook_split("   ", argv, 8, store, sizeof store, err, sizeof err), -EINVAL);
    assert_int_equal(app_hook_split("a b c d e f g h i", argv, 8, store, sizeof store, err, sizeof err), -E2BIG);
}

static int hook_wait(app_hook *h, int *status, char *msg, size_t n)
{
    for (int i = 0; i < 1000; i++) {
        if (app_hook_poll(h, status, msg, n))
            return 1;
        struct timespec ts = {0, 5 * 1000 * 1000};
        nanosleep(&ts, NULL);
    }
    return 0;
}

/* The on-ready command runs without a shell (a ';' or '>' reaches it as
 * plain text), does not block, and its exit status comes back through the
 * poll (wait status macros, POSIX waitpid). */
static void test_hook_runs_and_reports(void **state)
{
    (void)state;
    char *dir = tmpdir_make();
    char line[1200], file[600], msg[300], err[200];
    snprintf(file, sizeof file, "%s/fired", dir);
    snprintf(line, sizeof line, "sh -c 'echo x > \"$1\"; exit 0' hook %s", file);
    app_hook *h = app_hook_create(line, err, sizeof err);
    assert_non_null(h);
    int status = -1;
    assert_int_equal(app_hook_poll(h, &status, msg, sizeof msg), 0);
    assert_int_equal(app_hook_start(h, msg, sizeof msg), 0);
    assert_true(hook_wait(h, &status, msg, sizeof msg));
    assert_true(WIFEXITED(status) && WEXITSTATUS(status) == 0);
    assert_non_null(strstr(msg, "status 0"));
    char *c = slurp(file);
    assert_non_null(c);
    assert_string_equal(c, "x\n");
    app_hook_destroy(h);

    /* a failing command: its status is reported */
    h = app_hook_create("sh -c 'exit 3'", err, sizeof err);
    assert_non_null(h);
    assert_int_equal(app_hook_start(h, msg, sizeof msg), 0);
    assert_true(hook_wait(h, &status, msg, sizeof msg));
    assert_true(WIFEXITED(status) && WEXITSTATUS(status) == 3);
    assert_non_null(strstr(msg, "status 3"));
    app_hook_destroy(h);

    /* no shell: "echo a; touch F" is echo with three arguments */
    char f2[700];
    snprintf(f2, sizeof f2, "%s/not-made", dir);
    snprintf(line, sizeof line, "echo a; touch %s", f2);
    h = app_hook_create(line, err, sizeof err);
    assert_non_null(h);
    assert_int_equal(app_hook_start(h, msg, sizeof msg), 0);
    assert_true(hook_wait(h, &status, msg, sizeof msg));
    assert_int_equal(access(f2, F_OK), -1);
    app_hook_destroy(h);

    /* a slow command: start returns at once, a second start is refused */
    h = app_hook_create("sleep 0.3", err, sizeof err);
    assert_non_null(h);
    assert_int_equal(app_hook_start(h, msg, sizeof msg), 0);
    assert_true(app_hook_running(h));
    assert_int_equal(app_hook_poll(h, &status, msg, sizeof msg), 0);
    assert_int_equal(app_hook_start(h, msg, sizeof msg), -EBUSY);
    assert_true(hook_wait(h, &status, msg, sizeof msg));
    assert_true(WIFEXITED(status) && WEXITSTATUS(status) == 0);
    app_hook_destroy(h);

    /* a missing program is an error at start, named */
    h = app_hook_create("/nonexistent/shutter --now", err, sizeof err);
    assert_non_null(h);
    assert_int_equal(app_hook_start(h, msg, sizeof msg), -ENOENT);
    assert_non_null(strstr(msg, "/nonexistent/shutter"));
    app_hook_destroy(h);
    assert_null(app_hook_create("'", err, sizeof err));
    unlink(file);
    rmdir(dir);
    free(dir);
}

/* The live loop's duties: --auto saves once each time the ready state is
 * entered (not on every ready frame), --on-ready runs on each entry, the
 * snapshot key saves regardless; saving happens off the main thread and
 * its outcome comes back through the poll.  (Our own rules, issue 5.) */
static int shots_settle(app_shots *s, int *saved, int *exits)
{
    for (int k = 0; k < 2000; k++) {
        while (app_shots_poll(s)) {
            if (!strncmp(s->msg, "Saved ", 6))
                (*saved)++;
            else if (strstr(s->msg, "exited with status 0"))
                (*exits)++;
            else if (!strstr(s->msg, "started"))
                fprintf(stderr, "shots: %s\n", s->msg);
        }
        if (!app_shots_busy(s))
            return 1;
        struct timespec ts = {0, 5 * 1000 * 1000};
        nanosleep(&ts, NULL);
    }
    return 0;
}

static void test_shots_auto_once_per_ready(void **state)
{
    (void)state;
    char *dir = tmpdir_make(), *side = tmpdir_make();
    char line[700], fired[600];
    snprintf(fired, sizeof fired, "%s/fired", side);
    snprintf(line, sizeof line, "sh -c 'echo r >> \"$1\"' hook %s", fired);
    app_opts o;
    memset(&o, 0, sizeof o);
    o.out_dir = dir;
    o.auto_snap = 1;
    o.on_ready = line;
    app_shots s;
    char err[256];
    assert_int_equal(app_shots_init(&s, &o, "test", err, sizeof err), 0);
    tframe t;
    pattern_frame(&t, 160, 100);
    coach_result r;
    memset(&r, 0, sizeof r);
    static const int seq[] = {0, 1, 1, 1, 0, 0, 1, 1, 0};
    int saved = 0, exits = 0;
    for (size_t i = 0; i < sizeof seq / sizeof seq[0]; i++) {
        r.ready = seq[i];
        app_shots_frame(&s, &t.f.view, &r, COACH_PROFILE_PRODUCT);
        assert_true(shots_settle(&s, &saved, &exits));
    }
    assert_int_equal(saved, 2);
    assert_int_equal(exits, 2);
    assert_int_equal(dir_count(dir), 4);
    char *c = slurp(fired);
    assert_non_null(c);
    assert_string_equal(c, "r\nr\n");
    /* the key: saved although not ready, no command run */
    s.pending = 1;
    r.ready = 0;
    app_shots_frame(&s, &t.f.view, &r, COACH_PROFILE_PRODUCT);
    assert_true(shots_settle(&s, &saved, &exits));
    assert_int_equal(saved, 3);
    assert_int_equal(exits, 2);
    assert_int_equal(dir_count(dir), 6);
    app_shots_fini(&s);
    /* a command that cannot be split is refused at start */
    o.on_ready = "echo 'half";
    assert_int_equal(app_shots_init(&s, &o, "test", err, sizeof err), -EINVAL);
    assert_non_null(strstr(err, "quote"));
    app_shots_fini(&s);
    rm_tree(dir);
    rm_tree(side);
    free(dir);
    free(side);
    free(t.px);
}

/* ==== section B ==== */

static int overlay_setup(void **state)
{
    (void)state;
    /* offscreen video and SDL's own software rasteriser: no display, no GPU */
    setenv("SDL_VIDEODRIVER", "offscreen", 1);
    SDL_SetHint(SDL_HINT_RENDER_DRIVER, "software");
    if (SDL_Init(SDL_INIT_VIDEO) != 0) {
        fprintf(stderr, "test_overlay: SDL_Init: %s\n", SDL_GetError());
        return -1;
    }
    return 0;
}

static int overlay_teardown(void **state)
{
    (void)state;
    SDL_Quit();
    return 0;
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        /* ---- section A ---- */
        cmocka_unit_test(test_guides_thirds_positions),
        cmocka_unit_test(test_guides_phi_positions),
        cmocka_unit_test(test_guides_horizon_angle),
        cmocka_unit_test(test_guides_crop_ratio),
        cmocka_unit_test(test_readouts_zebras_only_clipped),
        cmocka_unit_test(test_readouts_peaking_only_edges),
        cmocka_unit_test(test_readouts_yuv_frames),
        cmocka_unit_test(test_readouts_rgb_histogram_yuv),
        cmocka_unit_test(test_guides_mirror_and_lost),
        cmocka_unit_test(test_text_mirror_words),
        cmocka_unit_test(test_keys_map),
        cmocka_unit_test(test_text_no_font_error),
        cmocka_unit_test(test_snapshot_roundtrip),
        cmocka_unit_test(test_snapshot_failed_write_leaves_nothing),
        cmocka_unit_test(test_snapshot_default_dir),
        cmocka_unit_test(test_hook_split_quotes),
        cmocka_unit_test(test_hook_runs_and_reports),
        cmocka_unit_test(test_shots_auto_once_per_ready),
        /* ---- section B ---- */
    };
    return cmocka_run_group_tests(tests, overlay_setup, overlay_teardown);
}
