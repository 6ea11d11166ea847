/* Readouts: zebras and focus peaking computed from the frame at display
 * resolution, histograms, the subject box with its arrow, the score meter
 * with its sparkline, hints, the explain panel, stats and state lines.
 * Buffers are sized on resize or format change, never per frame. */
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "overlay/overlay_internal.h"

/* ---- per-pixel luma ---------------------------------------------------- */

static inline int expand_limited(int y, const coach_frame *f)
{
    if (f->range == COACH_RANGE_FULL)
        return y;
    /* ITU-R BT.601/BT.709 narrow range: Y' 16..235 for black..white */
    int v = (y - 16) * 255 / 219;
    return v < 0 ? 0 : v > 255 ? 255 : v;
}

static inline __attribute__((always_inline)) int luma_of(const coach_frame *f, coach_format fmt, int x, int y)
{
    const uint8_t *row = f->data + (size_t)y * (size_t)f->stride;
    const uint8_t *p;
    /* BT.709 luma weights 0.2126, 0.7152, 0.0722 (ITU-R BT.709-6, item 3.2)
     * in 1/256ths: 54, 183, 19 - the same luma the coach clips at 250. */
    switch (fmt) {
    case COACH_FMT_XRGB8888: p = row + 4 * x; return (54 * p[2] + 183 * p[1] + 19 * p[0] + 128) >> 8;
    case COACH_FMT_RGB24: p = row + 3 * x; return (54 * p[0] + 183 * p[1] + 19 * p[2] + 128) >> 8;
    case COACH_FMT_BGR24: p = row + 3 * x; return (54 * p[2] + 183 * p[1] + 19 * p[0] + 128) >> 8;
    case COACH_FMT_YUYV: return expand_limited(row[2 * x], f);
    case COACH_FMT_NV12: return expand_limited(row[x], f);
    case COACH_FMT_GREY: return row[x];
    default: return 0;
    }
}

int ovl_luma_at(const coach_frame *f, int x, int y)
{
    return luma_of(f, f->format, x, y);
}

/* ---- zebras and peaking -------------------------------------------------- */

static int grow(void **p, size_t *cap, size_t need, size_t elem)
{
    if (need <= *cap)
        return 0;
    void *n = realloc(*p, need * elem);
    if (!n)
        return -1;
    *p = n;
    *cap = need;
    return 0;
}

static Uint32 argb(SDL_Color c)
{
    return 0xff000000u | ((Uint32)c.r << 16) | ((Uint32)c.g << 8) | c.b;
}

typedef struct mask_args {
    ovl_window *w;
    const coach_frame *f;
    int mw, mh, two;
    Uint32 zc, pc;
    int period, phase;
} mask_args;

static inline __attribute__((always_inline)) void mask_rows(const mask_args *m, coach_format fmt)
{
    ovl_window *w = m->w;
    const coach_frame *f = m->f;
    int mw = m->mw, mh = m->mh, fw = f->w, fh = f->h, two = m->two, period = m->period;
    int thr = w->peak_threshold, zeb = w->zebras, peak = w->peaking;
    Uint32 zc = m->zc, pc = m->pc;
    for (int y = 0; y < mh; y++) {
        int sy = (int)(((double)y + 0.5) * fh / mh);
        if (sy >= fh)
            sy = fh - 1;
        uint32_t *out = w->mask + (size_t)y * mw;
        int ycore = sy > 0 && sy < fh - 2;
        int zrow = (y + m->phase) % period;
        for (int x = 0; x < mw; x++) {
            int sx = w->mask_sx[x];
            uint32_t o = 0;
            int l = luma_of(f, fmt, sx, sy);
            if (zeb && l >= 250 && (x + zrow) % period < period / 2)
                o = zc;
            if (peak && ycore && sx > 0 && sx < fw - 2) {
                int gx = abs(luma_of(f, fmt, sx + 1, sy) - luma_of(f, fmt, sx - 1, sy));
                int gy = abs(luma_of(f, fmt, sx, sy + 1) - luma_of(f, fmt, sx, sy - 1));
                if (two && gx + gy < thr) {
                    int gx2 = abs(luma_of(f, fmt, sx + 2, sy) - l);
                    int gy2 = abs(luma_of(f, fmt, sx, sy + 2) - l);
                    gx = gx > gx2 ? gx : gx2;
                    gy = gy > gy2 ? gy : gy2;
                }
                if (gx + gy >= thr)
                    o = pc;
            }
            out[x] = o;
        }
    }
}

/* The marks are computed on a grid of at most OVL_MASK_MAX_PX samples over
 * the frame (display resolution or an integer fraction of it) and painted
 * into the frame texture as it is filled, each over the block of source
 * pixels its sample stands for: no extra full-window blend pass, which is
 * what a software renderer cannot afford at 30 fps. */
void ovl_update_mask(ovl_window *w, const coach_frame *f)
{
    w->mask_valid = 0;
    if (!(w->zebras || w->peaking) || !f || !f->data || f->w < 4 || f->h < 4)
        return;
    int dw = (int)w->fr.w, dh = (int)w->fr.h;
    if (dw < 1 || dh < 1)
        return;
    int k = 1;
    while ((long)(dw / k) * (dh / k) > OVL_MASK_MAX_PX)
        k++;
    int mw = (dw + k - 1) / k, mh = (dh + k - 1) / k;
    if (mw > f->w)
        mw = f->w;
    if (mh > f->h)
        mh = f->h;
    if (grow((void **)&w->mask, &w->mask_cap, (size_t)mw * mh, sizeof(uint32_t)) ||
        grow((void **)&w->mask_sx, &w->mask_sx_cap, (size_t)mw + 1, sizeof(int)))
        return;
    w->mw = mw;
    w->mh = mh;
    int fw = f->w;
    for (int x = 0; x < mw; x++) {
        int sx = (int)(((double)x + 0.5) * fw / mw);
        w->mask_sx[x] = sx < fw ? sx : fw - 1;
    }
    /* Source pixels between two samples: peaking looks at two neighbouring
     * central differences so an edge between samples is not missed. */
    int two = fw > mw * 3 / 2;
    Uint32 zc = argb(ovl_zebra), pc = argb(ovl_peak[w->peak_colour % OVL_PEAK_COLOURS]);
    /* Stripes at 45 degrees, about 6 screen pixels wide, drifting slowly so
     * they are not taken for scene texture (common practice). */
    int period = 12 / k < 4 ? 4 : 12 / k;
    int phase = (int)(w->frames / 2 % (uint64_t)period);
    mask_args m = {w, f, mw, mh, two, zc, pc, period, phase};
    switch (f->format) {
    /* one copy of the loop per layout, so the per-pixel luma is inlined
     * without a switch inside the hot loop */
    case COACH_FMT_XRGB8888: mask_rows(&m, COACH_FMT_XRGB8888); break;
    case COACH_FMT_RGB24: mask_rows(&m, COACH_FMT_RGB24); break;
    case COACH_FMT_BGR24: mask_rows(&m, COACH_FMT_BGR24); break;
    case COACH_FMT_YUYV: mask_rows(&m, COACH_FMT_YUYV); break;
    case COACH_FMT_NV12: mask_rows(&m, COACH_FMT_NV12); break;
    case COACH_FMT_GREY: mask_rows(&m, COACH_FMT_GREY); break;
    default: return;
    }
    w->mask_valid = 1;
}

/* Y'CbCr of an sRGB colour for painting into camera textures (ITU-R
 * BT.601-7 / BT.709-6 matrices; narrow range 16-235 / 16-240). */
static void to_ycc(Uint32 c, const coach_frame *f, uint8_t *y, uint8_t *cb, uint8_t *cr)
{
    double r = (c >> 16) & 255, g = (c >> 8) & 255, b = c & 255;
    double kr = f->matrix == COACH_MATRIX_BT709 ? 0.2126 : 0.299;
    double kb = f->matrix == COACH_MATRIX_BT709 ? 0.0722 : 0.114;
    double Y = kr * r + (1 - kr - kb) * g + kb * b;
    double Cb = (b - Y) / (2 * (1 - kb)), Cr = (r - Y) / (2 * (1 - kr));
    if (f->range != COACH_RANGE_FULL) {
        Y = 16 + Y * 219.0 / 255.0;
        Cb *= 224.0 / 255.0;
        Cr *= 224.0 / 255.0;
    }
    *y = (uint8_t)lround(Y);
    *cb = (uint8_t)lround(128 + Cb);
    *cr = (uint8_t)lround(128 + Cr);
}

void ovl_paint_mask(ovl_window *w, const coach_frame *f, void *pixels, int pitch)
{
    if (!w->mask_valid)
        return;
    int fw = f->w, fh = f->h, mw = w->mw, mh = w->mh;
    uint8_t *base = pixels;
    uint8_t *uvbase = base + (size_t)pitch * fh; /* NV12: chroma after luma */
    int uvpitch = (pitch + 1) & ~1;
    for (int my = 0; my < mh; my++) {
        const uint32_t *m = w->mask + (size_t)my * mw;
        int y0 = (int)((long)my * fh / mh), y1 = (int)((long)(my + 1) * fh / mh);
        for (int mx = 0; mx < mw; mx++) {
            Uint32 c = m[mx];
            if (!c)
                continue;
            int x0 = (int)((long)mx * fw / mw), x1 = (int)((long)(mx + 1) * fw / mw);
            uint8_t Y = 0, U = 0, V = 0;
            if (f->format == COACH_FMT_YUYV || f->format == COACH_FMT_NV12)
                to_ycc(c, f, &Y, &U, &V);
            for (int y = y0; y < y1; y++) {
                uint8_t *row = base + (size_t)y * pitch;
                switch (f->format) {
                case COACH_FMT_XRGB8888:
                case COACH_FMT_GREY:
                    for (int x = x0; x < x1; x++)
                        ((uint32_t *)row)[x] = c;
                    break;
                case COACH_FMT_RGB24:
                case COACH_FMT_BGR24: {
                    uint8_t r = (uint8_t)(c >> 16), g = (uint8_t)(c >> 8), b = (uint8_t)c;
                    if (f->format == COACH_FMT_BGR24) {
                        uint8_t t = r;
                        r = b;
                        b = t;
                    }
                    for (int x = x0; x < x1; x++) {
                        row[3 * x] = r;
                        row[3 * x + 1] = g;
                        row[3 * x + 2] = b;
                    }
                    break;
                }
                case COACH_FMT_YUYV:
                    for (int x = x0; x < x1; x++) {
                        row[2 * x] = Y;
                        row[4 * (x >> 1) + 1] = U;
                        row[4 * (x >> 1) + 3] = V;
                    }
                    break;
                case COACH_FMT_NV12:
                    for (int x = x0; x < x1; x++) {
                        row[x] = Y;
                        uint8_t *uv = uvbase + (size_t)(y >> 1) * uvpitch + (x & ~1);
                        uv[0] = U;
                        uv[1] = V;
                    }
                    break;
                default: break;
                }
            }
        }
    }
}

/* ---- RGB histogram ------------------------------------------------------- */

/* R'G'B' of one Y'CbCr sample: the inverse of the BT.601-7 / BT.709-6
 * matrix, narrow range expanded first (Y' 16..235, C 16..240). */
static void ycc_to_rgb(const coach_frame *f, int Y, int U, int V, int rgb[3])
{
    double y = Y, cb = U - 128, cr = V - 128;
    if (f->range != COACH_RANGE_FULL) {
        y = (y - 16) * 255.0 / 219.0;
        cb *= 255.0 / 224.0;
        cr *= 255.0 / 224.0;
    }
    double kr = f->matrix == COACH_MATRIX_BT709 ? 0.2126 : 0.299;
    double kb = f->matrix == COACH_MATRIX_BT709 ? 0.0722 : 0.114, kg = 1 - kr - kb;
    double r = y + 2 * (1 - kr) * cr, b = y + 2 * (1 - kb) * cb;
    double g = (y - kr * r - kb * b) / kg;
    double v[3] = {r, g, b};
    for (int i = 0; i < 3; i++)
        rgb[i] = v[i] < 0 ? 0 : v[i] > 255 ? 255 : (int)lround(v[i]);
}

void ovl_update_hist_rgb(ovl_window *w, const coach_frame *f)
{
    if (w->hist_mode != 2 || !f || !f->data)
        return;
    memset(w->hist_rgb, 0, sizeof w->hist_rgb);
    w->hist_rgb_total = 0;
    int bpp = f->format == COACH_FMT_XRGB8888 ? 4 : 3;
    int ri = f->format == COACH_FMT_BGR24 || f->format == COACH_FMT_XRGB8888 ? 2 : 0;
    int ycc = f->format == COACH_FMT_YUYV || f->format == COACH_FMT_NV12;
    if (!ycc && f->format != COACH_FMT_XRGB8888 && f->format != COACH_FMT_RGB24 && f->format != COACH_FMT_BGR24)
        return; /* grey: the luma histogram stands in (drawn as such) */
    const uint8_t *uvp = f->data2 ? f->data2 : f->data + (size_t)f->stride * f->h;
    int s2 = f->stride2 ? f->stride2 : f->stride;
    /* About 100k samples: enough for a histogram's shape, cheap at 4K. */
    int step = (int)sqrt((double)f->w * f->h / 100000.0);
    if (step < 1)
        step = 1;
    for (int y = step / 2; y < f->h; y += step) {
        const uint8_t *row = f->data + (size_t)y * (size_t)f->stride;
        for (int x = step / 2; x < f->w; x += step) {
            int c[3];
            if (f->format == COACH_FMT_YUYV) {
                const uint8_t *q = row + 4 * (x >> 1);
                ycc_to_rgb(f, row[2 * x], q[1], q[3], c);
            } else if (f->format == COACH_FMT_NV12) {
                const uint8_t *q = uvp + (size_t)(y >> 1) * s2 + (x & ~1);
                ycc_to_rgb(f, row[x], q[0], q[1], c);
            } else {
                const uint8_t *p = row + (size_t)x * bpp;
                c[0] = p[ri];
                c[1] = p[1];
                c[2] = p[2 - ri];
            }
            w->hist_rgb[0][c[0]]++;
            w->hist_rgb[1][c[1]]++;
            w->hist_rgb[2][c[2]]++;
            w->hist_rgb_total++;
        }
    }
}

static void hist_strip(ovl_window *w, const uint32_t *h, float x, float y, float bw, float bh, SDL_Color c)
{
    uint32_t mx = 1;
    for (int i = 0; i < 256; i++)
        if (h[i] > mx)
            mx = h[i];
    /* square-root scale: small populations stay visible (common practice) */
    double sm = sqrt((double)mx);
    SDL_FRect bars[256];
    float bin = bw / 256.0f;
    int n = 0;
    for (int i = 0; i < 256; i++) {
        float hh = (float)(sqrt((double)h[i]) / sm) * bh;
        if (hh < 0.5f)
            continue;
        bars[n++] = (SDL_FRect){x + (float)i * bin, y + bh - hh, bin + 0.35f, hh};
    }
    SDL_SetRenderDrawColor(w->ren, c.r, c.g, c.b, c.a);
    SDL_RenderFillRectsF(w->ren, bars, n);
}

static void histogram(ovl_window *w, const coach_result *r)
{
    if (!w->hist_mode || !r)
        return;
    float m = (float)w->font_px * 0.7f;
    float bw = (float)w->font_px * 13.0f, bh = (float)w->font_px * 4.0f;
    int rgb = w->hist_mode == 2 && w->hist_rgb_total > 0;
    float ph = rgb ? bh * 1.8f : bh;
    float x = m + 8 + (float)w->font_px * 1.2f, y = (float)w->wh - m - ph - 8;
    ovl_panel_rect(w, x - 8 - (float)w->font_px * 1.2f, y - 8, bw + 16 + (float)w->font_px * 1.2f, ph + 16);
    if (rgb) {
        /* three strips, each with its letter: told apart by place and name */
        static const SDL_Color cc[3] = {{255, 120, 110, 230}, {150, 235, 140, 230}, {120, 160, 255, 230}};
        static const char *names[3] = {"R", "G", "B"};
        float sh = ph / 3.0f - 3;
        for (int i = 0; i < 3; i++) {
            float yy = y + (float)i * (sh + 4.5f);
            hist_strip(w, w->hist_rgb[i], x, yy, bw, sh, cc[i]);
            ovl_text(w, w->font_small, names[i], x - 4, yy + sh / 2 - (float)w->font_px * 0.55f, 2, ovl_dimtext);
        }
    } else {
        hist_strip(w, r->hist, x, y, bw, bh, (SDL_Color){226, 226, 232, 225});
        ovl_text(w, w->font_small, "Y", x - 4, y + bh / 2 - (float)w->font_px * 0.55f, 2, ovl_dimtext);
    }
    /* clipping flags: a filled triangle at the clipped end */
    float s = (float)w->font_px * 0.5f;
    if (r->clip_high > 0.001) {
        float tx = x + bw, ty = y - 2;
        ovl_stroke_col(w, tx - s, ty, tx, ty, 2, ovl_accent);
        ovl_stroke_col(w, tx, ty, tx, ty + s, 2, ovl_accent);
        ovl_stroke_col(w, tx - s, ty, tx, ty + s, 2, ovl_accent);
    }
    if (r->clip_low > 0.001) {
        float tx = x, ty = y - 2;
        ovl_stroke_col(w, tx + s, ty, tx, ty, 2, ovl_level);
        ovl_stroke_col(w, tx, ty, tx, ty + s, 2, ovl_level);
        ovl_stroke_col(w, tx + s, ty, tx, ty + s, 2, ovl_level);
    }
    ovl_strokes_flush(w);
}

/* ---- subject box and its arrow -------------------------------------------- */

static void corners(ovl_window *w, float x0, float y0, float x1, float y1, float len, float wd, SDL_Color c)
{
    ovl_stroke_col(w, x0, y0, x0 + len, y0, wd, c);
    ovl_stroke_col(w, x0, y0, x0, y0 + len, wd, c);
    ovl_stroke_col(w, x1, y0, x1 - len, y0, wd, c);
    ovl_stroke_col(w, x1, y0, x1, y0 + len, wd, c);
    ovl_stroke_col(w, x0, y1, x0 + len, y1, wd, c);
    ovl_stroke_col(w, x0, y1, x0, y1 - len, wd, c);
    ovl_stroke_col(w, x1, y1, x1 - len, y1, wd, c);
    ovl_stroke_col(w, x1, y1, x1, y1 - len, wd, c);
}

static void ring(ovl_window *w, float cx, float cy, float rad, float wd, SDL_Color c)
{
    int n = 20;
    for (int i = 0; i < n; i++) {
        double a0 = 2 * M_PI * i / n, a1 = 2 * M_PI * (i + 1) / n;
        ovl_stroke_col(w, cx + rad * (float)cos(a0), cy + rad * (float)sin(a0), cx + rad * (float)cos(a1),
                       cy + rad * (float)sin(a1), wd, c);
    }
}

void ovl_draw_subject(ovl_window *w, const coach_result *r)
{
    if (!w->subject || !r || !r->has_subject)
        return;
    const coach_box *b = &r->subject;
    float x0, y0, x1, y1;
    ovl_map(w, b->x - b->w / 2, b->y - b->h / 2, &x0, &y0);
    ovl_map(w, b->x + b->w / 2, b->y + b->h / 2, &x1, &y1);
    if (x1 < x0) {
        float t = x0;
        x0 = x1;
        x1 = t;
    }
    float len = fminf(x1 - x0, y1 - y0) * 0.22f;
    if (len < 6)
        len = 6;
    corners(w, x0, y0, x1, y1, len, 2.0f, ovl_ink);
    /* the nearest power point of the grid in use */
    double a = w->grid == COACH_GRID_PHI ? OVL_PHI_A : 1.0 / 3.0, bb = 1.0 - a;
    int p = r->placement_point;
    if (p < 0 || p > 3)
        p = (b->x > 0.5) + 2 * (b->y > 0.5);
    double pu = (p & 1) ? bb : a, pv = (p & 2) ? bb : a;
    float cx, cy, tx, ty;
    ovl_map(w, b->x, b->y, &cx, &cy);
    ovl_map(w, pu, pv, &tx, &ty);
    float rad = (float)w->font_px * 0.45f;
    float dx = tx - cx, dy = ty - cy, d = sqrtf(dx * dx + dy * dy);
    if (d < rad * 2.5f) {
        /* on the point: a double ring, no arrow */
        ring(w, tx, ty, rad, 2.0f, ovl_level);
        ring(w, tx, ty, rad * 1.8f, 1.5f, ovl_level);
    } else {
        float ux = dx / d, uy = dy / d;
        float ex = tx - ux * rad * 1.2f, ey = ty - uy * rad * 1.2f;
        float hl = rad * 1.6f;
        ovl_stroke(w, cx, cy, ex, ey, 2.5f);
        ovl_stroke(w, ex, ey, ex - ux * hl - uy * hl * 0.6f, ey - uy * hl + ux * hl * 0.6f, 2.5f);
        ovl_stroke(w, ex, ey, ex - ux * hl + uy * hl * 0.6f, ey - uy * hl - ux * hl * 0.6f, 2.5f);
        ring(w, tx, ty, rad, 2.0f, ovl_ink);
        ring(w, cx, cy, 3.0f, 2.0f, ovl_ink);
    }
    ovl_strokes_flush(w);
}

/* ---- score meter and sparkline ---------------------------------------------- */

void ovl_spark_push(ovl_window *w, double t, double score)
{
    if (w->spark_n > 0) {
        int last = (w->spark_head + OVL_SPARK_N - 1) % OVL_SPARK_N;
        if (t < w->spark_t[last])
            w->spark_n = 0; /* time went back: a new source */
    }
    w->spark_t[w->spark_head] = t;
    w->spark_s[w->spark_head] = (float)score;
    w->spark_head = (w->spark_head + 1) % OVL_SPARK_N;
    if (w->spark_n < OVL_SPARK_N)
        w->spark_n++;
}

static void meter(ovl_window *w, const coach_result *r)
{
    if (!w->meter || !r)
        return;
    float fp = (float)w->font_px, m = fp * 0.7f;
    float pw = fp * 13.0f, bar_h = fp * 0.55f, spark_h = fp * 2.4f;
    int tw, th;
    ovl_text_size(w, w->font_big, "100", &tw, &th);
    float ph = (float)th + bar_h + spark_h + fp * 1.3f + (float)TTF_FontLineSkip(w->font_small) + 4;
    float x = m, y = m;
    ovl_panel_rect(w, x, y, pw, ph);
    char s[32];
    snprintf(s, sizeof s, "%.0f", r->score);
    float ix = x + fp * 0.6f, iy = y + fp * 0.3f;
    int nw = ovl_text(w, w->font_big, s, ix, iy, 0, r->ready ? ovl_accent : ovl_ink);
    ovl_text(w, w->font_small, "score", ix + (float)nw + fp * 0.4f, iy + (float)th * 0.22f, 0, ovl_dimtext);
    if (r->ready) {
        /* a filled diamond beside the word: the ready state is a shape too */
        float dx = ix + (float)nw + fp * 0.9f, dy = iy + (float)th * 0.72f, s2 = fp * 0.35f;
        SDL_Vertex v[4] = {{{dx, dy - s2}, {ovl_accent.r, ovl_accent.g, ovl_accent.b, 255}, {0, 0}},
                           {{dx + s2, dy}, {ovl_accent.r, ovl_accent.g, ovl_accent.b, 255}, {0, 0}},
                           {{dx, dy + s2}, {ovl_accent.r, ovl_accent.g, ovl_accent.b, 255}, {0, 0}},
                           {{dx - s2, dy}, {ovl_accent.r, ovl_accent.g, ovl_accent.b, 255}, {0, 0}}};
        int idx[6] = {0, 1, 2, 0, 2, 3};
        SDL_RenderGeometry(w->ren, NULL, v, 4, idx, 6);
        ovl_text(w, w->font, "ready", dx + s2 + fp * 0.3f, dy - fp * 0.62f, 0, ovl_accent);
    }
    /* the bar, with a notch where ready begins */
    float bx = ix, by = iy + (float)th + fp * 0.2f, bw = pw - fp * 1.2f;
    ovl_fill(w, bx, by, bw, bar_h, (SDL_Color){60, 64, 74, 230});
    double sc = r->score < 0 ? 0 : r->score > 100 ? 100 : r->score;
    ovl_fill(w, bx, by, bw * (float)(sc / 100.0), bar_h, r->ready ? ovl_accent : ovl_ink);
    float nx = bx + bw * (float)(w->ready_enter / 100.0);
    ovl_fill(w, nx - 1, by - 3, 2, bar_h + 6, ovl_level);
    /* sparkline: the last 10 s, newest at the right */
    float sy = by + bar_h + fp * 0.5f;
    ovl_fill(w, bx, sy + spark_h * (float)(1 - w->ready_enter / 100.0), bw, 1, (SDL_Color){96, 200, 255, 120});
    if (w->spark_n > 1) {
        int last = (w->spark_head + OVL_SPARK_N - 1) % OVL_SPARK_N;
        double tn = w->spark_t[last];
        float px = 0, py = 0;
        int have = 0;
        for (int i = w->spark_n - 1; i >= 0; i--) {
            int j = (w->spark_head + OVL_SPARK_N - 1 - i) % OVL_SPARK_N;
            double age = tn - w->spark_t[j];
            if (age > OVL_SPARK_SECONDS)
                continue;
            float qx = bx + bw * (float)(1.0 - age / OVL_SPARK_SECONDS);
            double v = w->spark_s[j] < 0 ? 0 : w->spark_s[j] > 100 ? 100 : w->spark_s[j];
            float qy = sy + spark_h * (float)(1.0 - v / 100.0);
            if (have && qx - px >= 1.0f) {
                ovl_stroke_plain(w, px, py, qx, qy, 1.6f, ovl_ink);
                px = qx;
                py = qy;
            } else if (!have) {
                px = qx;
                py = qy;
                have = 1;
            }
        }
        ovl_strokes_flush(w);
    }
    ovl_text(w, w->font_small, "last 10 s", bx + bw, sy + spark_h + 2, 2, ovl_dimtext);
}

/* ---- text readouts ----------------------------------------------------------- */

/* In a mirrored view the picture's left is on the screen's right: a hint
 * that names a side is turned to match what the shooter sees.  Turning
 * directions (clockwise) are about the camera itself and stay. */
void ovl_mirror_words(const char *in, char *out, size_t n)
{
    size_t o = 0;
    while (*in && o + 6 < n) {
        int start = o == 0 || !((out[o - 1] >= 'a' && out[o - 1] <= 'z') || (out[o - 1] >= 'A' && out[o - 1] <= 'Z'));
        const char *rep = NULL;
        size_t skip = 0;
        if (start && !strncmp(in, "left", 4))
            rep = "right", skip = 4;
        else if (start && !strncmp(in, "right", 5))
            rep = "left", skip = 5;
        else if (start && !strncmp(in, "Left", 4))
            rep = "Right", skip = 4;
        else if (start && !strncmp(in, "Right", 5))
            rep = "Left", skip = 5;
        char nx = rep ? in[skip] : 0;
        if (rep && !((nx >= 'a' && nx <= 'z') || (nx >= 'A' && nx <= 'Z'))) {
            size_t k = strlen(rep);
            memcpy(out + o, rep, k);
            o += k;
            in += skip;
        } else {
            out[o++] = *in++;
        }
    }
    out[o < n ? o : n - 1] = 0;
}

static void hints(ovl_window *w, const coach_result *r)
{
    if (!w->hints || !r || r->nhints <= 0)
        return;
    float fp = (float)w->font_px;
    int n = r->nhints > COACH_MAX_HINTS ? COACH_MAX_HINTS : r->nhints;
    int maxw = 0, lh = TTF_FontLineSkip(w->font);
    char line[COACH_MAX_HINTS][COACH_HINT_LEN + 8];
    for (int i = 0; i < n; i++) {
        char h[COACH_HINT_LEN];
        if (w->mirror)
            ovl_mirror_words(r->hints[i], h, sizeof h);
        else
            snprintf(h, sizeof h, "%s", r->hints[i]);
        snprintf(line[i], sizeof line[i], "%s %s", i == 0 ? "▸" : "·", h);
        int tw, th;
        ovl_text_size(w, w->font, line[i], &tw, &th);
        if (tw > maxw)
            maxw = tw;
    }
    float ph = (float)(lh * n) + fp * 0.8f, pw = (float)maxw + fp * 1.6f;
    float x = ((float)w->ww - pw) / 2, y = (float)w->wh - ph - fp * 0.7f;
    if (w->hist_mode && x < fp * 16.5f)
        x = fp * 16.5f; /* keep clear of the histogram */
    ovl_panel_rect(w, x, y, pw, ph);
    for (int i = 0; i < n; i++)
        ovl_text(w, w->font, line[i], x + fp * 0.8f, y + fp * 0.4f + (float)(lh * i), 0, i == 0 ? ovl_ink : ovl_dimtext);
}

static float label_and_stats(ovl_window *w, const ovl_status *st)
{
    float fp = (float)w->font_px, m = fp * 0.7f;
    float y = m;
    int lh = TTF_FontLineSkip(w->font_small);
    int lines = 0, maxw = 0;
    char l[3][200];
    if (w->label && st) {
        snprintf(l[lines++], sizeof l[0], "%s · %s%s", st->source_name ? st->source_name : "no source",
                 coach_profile_name(st->profile), w->mirror ? " · mirrored" : "");
    }
    if (w->stats && st) {
        snprintf(l[lines++], sizeof l[0], "%.1f fps shown · %llu dropped", st->fps_shown,
                 (unsigned long long)st->dropped);
        snprintf(l[lines++], sizeof l[0], "capture → screen %.0f ms · drawing %.1f ms, %.1f CPU (%s)",
                 st->latency_ms, w->render_ms, w->render_cpu_ms, w->renderer_name);
    }
    if (!lines)
        return y;
    for (int i = 0; i < lines; i++) {
        int tw, th;
        ovl_text_size(w, w->font_small, l[i], &tw, &th);
        if (tw > maxw)
            maxw = tw;
    }
    float pw = (float)maxw + fp, ph = (float)(lh * lines) + fp * 0.5f;
    float x = (float)w->ww - m - pw;
    ovl_panel_rect(w, x, y, pw, ph);
    for (int i = 0; i < lines; i++) {
        ovl_text(w, w->font_small, l[i], x + fp * 0.5f, y + fp * 0.25f + (float)(lh * i), 0, i == 0 ? ovl_ink : ovl_dimtext);
    }
    return y + ph + fp * 0.4f;
}

static void explain(ovl_window *w, const coach_result *r, float top)
{
    if (!w->explain || !r)
        return;
    /* Numbers that change every frame cannot be read: the panel takes a
     * new result four times a second (and re-renders its text only then). */
    if (!w->explain_have || r->t < w->explain_res.t || r->t - w->explain_res.t >= 0.25) {
        w->explain_res = *r;
        w->explain_have = 1;
    }
    r = &w->explain_res;
    float fp = (float)w->font_px, m = fp * 0.7f;
    int n = r->nterms > COACH_MAX_TERMS ? COACH_MAX_TERMS : r->nterms;
    double wsum = 0;
    for (int i = 0; i < n; i++)
        wsum += r->terms[i].weight;
    char title[80], detail[COACH_MAX_TERMS][160];
    snprintf(title, sizeof title, "Score %.0f — where it comes from", r->score);
    for (int i = 0; i < n; i++) {
        const coach_term *t = &r->terms[i];
        snprintf(detail[i], sizeof detail[i], "%.0f%% of full marks · counts %.0f%% of the score → %.1f points",
                 100.0 * t->value, wsum > 0 ? 100.0 * t->weight / wsum : 0.0, t->contribution);
    }
    /* two lines a part when they fit, else one short line each */
    int lh = TTF_FontLineSkip(w->font), sh = TTF_FontLineSkip(w->font_small);
    float row = (float)(lh + sh) + fp * 0.35f;
    float head = (float)lh * 1.4f + fp * 0.2f;
    int compact = top + head + row * (float)n + fp > (float)w->wh;
    if (compact)
        row = (float)sh + fp * 0.35f;
    int maxw = 0, tw, th;
    ovl_text_size(w, w->font, title, &maxw, &th);
    for (int i = 0; i < n; i++) {
        const coach_term *t = &r->terms[i];
        const char *label = t->label ? t->label : t->name ? t->name : "?";
        if (compact) {
            snprintf(detail[i], sizeof detail[i], "%s: %.0f%% → %.1f points", label, 100.0 * t->value,
                     t->contribution);
            ovl_text_size(w, w->font_small, detail[i], &tw, &th);
        } else {
            ovl_text_size(w, w->font, label, &tw, &th);
            if (tw > maxw)
                maxw = tw;
            ovl_text_size(w, w->font_small, detail[i], &tw, &th);
        }
        if (tw > maxw)
            maxw = tw;
    }
    float pw = (float)maxw + fp * 1.2f;
    if (pw > (float)w->ww * 0.6f)
        pw = (float)w->ww * 0.6f;
    float ph = head + row * (float)(n ? n : 1) + fp * 0.4f;
    float x = (float)w->ww - m - pw, y = top;
    ovl_panel_rect(w, x, y, pw, ph);
    ovl_text(w, w->font, title, x + fp * 0.6f, y + fp * 0.3f, 0, ovl_ink);
    y += head;
    if (!n)
        ovl_text(w, w->font_small, "No score parts for this frame yet.", x + fp * 0.6f, y, 0, ovl_dimtext);
    for (int i = 0; i < n; i++) {
        const coach_term *t = &r->terms[i];
        const char *label = t->label ? t->label : t->name ? t->name : "?";
        float ty = y;
        if (compact) {
            ovl_text(w, w->font_small, detail[i], x + fp * 0.6f, ty, 0, ovl_ink);
            ty += (float)sh;
        } else {
            ovl_text(w, w->font, label, x + fp * 0.6f, ty, 0, ovl_ink);
            ovl_text(w, w->font_small, detail[i], x + fp * 0.6f, ty + (float)lh, 0, ovl_dimtext);
            ty += (float)(lh + sh);
        }
        /* a thin bar: how much of its share this part earns */
        float bw = pw - fp * 1.2f;
        ovl_fill(w, x + fp * 0.6f, ty + 1, bw, 3, (SDL_Color){70, 74, 84, 230});
        double v = t->value < 0 ? 0 : t->value > 1 ? 1 : t->value;
        ovl_fill(w, x + fp * 0.6f, ty + 1, bw * (float)v, 3, ovl_ink);
        y += row;
    }
}

static void ready_border(ovl_window *w, const coach_result *r)
{
    if (!r || !r->ready)
        return;
    const SDL_FRect *f = &w->fr;
    float wd = (float)w->font_px * 0.3f;
    if (wd < 4)
        wd = 4;
    float in = wd / 2 + 1;
    ovl_frame_rect(w, f->x + in, f->y + in, f->w - 2 * in, f->h - 2 * in, wd, ovl_accent);
    /* heavier corner brackets: the cue is a shape as well as a colour */
    float len = fminf(f->w, f->h) * 0.08f, cw = wd * 2.2f, o = cw / 2 + 1;
    corners(w, f->x + o, f->y + o, f->x + f->w - o, f->y + f->h - o, len, cw, ovl_accent);
    ovl_strokes_flush(w);
}

static void lost(ovl_window *w, const ovl_status *st)
{
    if (!st || (!st->source_lost && !st->message))
        return;
    float fp = (float)w->font_px;
    if (st->source_lost)
        ovl_fill(w, w->fr.x, w->fr.y, w->fr.w, w->fr.h, (SDL_Color){0, 0, 0, 150});
    const char *msg = st->message ? st->message : "The source is gone.";
    TTF_Font *font = st->source_lost ? w->font_big : w->font;
    int tw, th;
    ovl_text_size(w, font, msg, &tw, &th);
    float x = ((float)w->ww - (float)tw) / 2, y = st->source_lost ? ((float)w->wh - (float)th) / 2 : fp * 5.5f;
    ovl_panel_rect(w, x - fp, y - fp * 0.5f, (float)tw + 2 * fp, (float)th + fp);
    ovl_text(w, font, msg, x, y, 0, st->source_lost ? ovl_accent : ovl_ink);
}

static void notice(ovl_window *w)
{
    if (!w->notice[0] || SDL_GetTicks64() > w->notice_until)
        return;
    float fp = (float)w->font_px, m = fp * 0.7f;
    int tw, th;
    ovl_text_size(w, w->font_small, w->notice, &tw, &th);
    float x = (float)w->ww - m - (float)tw - fp, y = (float)w->wh - m - (float)th - fp * 0.5f;
    ovl_panel_rect(w, x, y, (float)tw + fp, (float)th + fp * 0.5f);
    ovl_text(w, w->font_small, w->notice, x + fp * 0.5f, y + fp * 0.25f, 0, ovl_ink);
}

static const char *guide_title(const ovl_window *w, char *buf, size_t n)
{
    switch (w->present_guide) {
    case OVL_G_THIRDS: return "Rule of thirds";
    case OVL_G_PHI: return "Phi grid (0.382 / 0.618)";
    case OVL_G_DIAGONALS: return "Diagonals";
    case OVL_G_SPIRAL: snprintf(buf, n, "Golden spiral %d/4", w->spiral_orient + 1); return buf;
    case OVL_G_CENTRE: return "Centre";
    case OVL_G_HORIZON: return "Level";
    case OVL_G_CROP: snprintf(buf, n, "Crop %s", ovl_crop_name[w->crop]); return buf;
    default: return "No guide";
    }
}

void ovl_draw_hud(ovl_window *w, const coach_result *r, const ovl_status *st)
{
    if (!w->font)
        return;
    ready_border(w, r);
    lost(w, st);
    meter(w, r);
    float top = label_and_stats(w, st);
    explain(w, r, top);
    histogram(w, r);
    hints(w, r);
    if (w->presenter && w->present_guide >= 0 && !w->help) {
        /* the guide's name, top right: clear of the meter at top left */
        char b[64];
        const char *t = guide_title(w, b, sizeof b);
        int tw, th;
        ovl_text_size(w, w->font_big, t, &tw, &th);
        float fp = (float)w->font_px, x = (float)w->ww - fp * 1.7f - (float)tw, y = fp * 0.7f;
        ovl_panel_rect(w, x - fp, y, (float)tw + 2 * fp, (float)th + fp * 0.4f);
        ovl_text(w, w->font_big, t, x, y + fp * 0.2f, 0, ovl_ink);
    }
    notice(w);
}
