/* Composition guides drawn over the frame: thirds, phi grid, diagonals,
 * golden spiral, centre mark, artificial horizon and crop masks. */
#include <math.h>
#include <stdio.h>
#include <string.h>

#include "overlay/overlay_internal.h"

const char *const ovl_guide_name[OVL_G_COUNT] = {
    [OVL_G_THIRDS] = "thirds",     [OVL_G_PHI] = "phi",       [OVL_G_DIAGONALS] = "diagonals",
    [OVL_G_SPIRAL] = "spiral",     [OVL_G_CENTRE] = "centre", [OVL_G_HORIZON] = "horizon",
    [OVL_G_CROP] = "crop",
};

/* Width:height.  4:5 is the 8x10 inch print shape and 1:1 the square of
 * 6x6 cm roll film (common practice); 3:2 is the 36x24 mm frame of 35 mm
 * film; 16:9 is the picture aspect of ITU-R BT.709 (1920x1080). */
const double ovl_crop_ratio[OVL_CROP_COUNT] = {0, 1.0, 4.0 / 5.0, 3.0 / 2.0, 16.0 / 9.0};
const char *const ovl_crop_name[OVL_CROP_COUNT] = {"", "1:1", "4:5", "3:2", "16:9"};

static int line_px(const ovl_window *w)
{
    /* One pixel up to ~1080 rows, then two, so lines stay visible on a
     * projector without getting heavy on a laptop. */
    return w->wh >= 1300 || w->presenter ? 2 : 1;
}

static void grid_lines(ovl_window *w, double a, double b)
{
    int t = line_px(w);
    const SDL_FRect *r = &w->fr;
    /* a and b are symmetric about 0.5, so mirroring leaves them in place;
     * casings first so no line's edge cuts across another's core */
    for (int pass = 1; pass <= 2; pass++) {
        ovl_vline(w, r->x + (float)(a * r->w), r->y, r->y + r->h, t, pass);
        ovl_vline(w, r->x + (float)(b * r->w), r->y, r->y + r->h, t, pass);
        ovl_hline(w, r->x, r->x + r->w, r->y + (float)(a * r->h), t, pass);
        ovl_hline(w, r->x, r->x + r->w, r->y + (float)(b * r->h), t, pass);
    }
}

static void diagonals(ovl_window *w)
{
    const SDL_FRect *r = &w->fr;
    float x0 = r->x, y0 = r->y, x1 = r->x + r->w, y1 = r->y + r->h;
    float wd = (float)line_px(w) + 0.5f;
    ovl_stroke(w, x0, y0, x1, y1, wd);
    ovl_stroke(w, x0, y1, x1, y0, wd);
    /* 45-degree lines from each corner, as far as the shorter side: where
     * strong diagonals of a scene usually want to run. */
    float s = r->w < r->h ? r->w : r->h;
    float t = wd * 0.75f;
    ovl_stroke(w, x0, y0, x0 + s, y0 + s, t);
    ovl_stroke(w, x1, y0, x1 - s, y0 + s, t);
    ovl_stroke(w, x0, y1, x0 + s, y1 - s, t);
    ovl_stroke(w, x1, y1, x1 - s, y1 - s, t);
}

/* The golden spiral as quarter circles in the squares that split a golden
 * rectangle (side ratio phi = (1 + sqrt 5) / 2, Euclid's "extreme and mean
 * ratio", Elements VI def. 3), stretched to the frame.  orient flips it
 * horizontally (bit 0) and vertically (bit 1); portrait frames use the
 * transposed construction. */
static void spiral(ovl_window *w, int orient)
{
    const SDL_FRect *r = &w->fr;
    int portrait = r->h > r->w;
    double x = 0, y = 0, rw = OVL_PHI, rh = 1.0;
    float px = 0, py = 0;
    int have = 0;
    float wd = (float)line_px(w) + 0.75f;
    for (int step = 0; step < 10; step++) {
        int d = step & 3;
        double s = (d == 0 || d == 2) ? rh : rw, cx, cy, a0;
        switch (d) {
        case 0: cx = x + s; cy = y + s; a0 = M_PI; x += s; rw -= s; break;
        case 1: cx = x; cy = y + s; a0 = 1.5 * M_PI; y += s; rh -= s; break;
        case 2: cx = x + rw - s; cy = y; a0 = 0; rw -= s; break;
        default: cx = x + rw; cy = y + rh - s; a0 = 0.5 * M_PI; rh -= s; break;
        }
        int segs = step < 4 ? 24 : 10;
        for (int k = 0; k <= segs; k++) {
            double a = a0 + 0.5 * M_PI * k / segs;
            double u = (cx + s * cos(a)) / OVL_PHI, v = cy + s * sin(a);
            if (orient & 1)
                u = 1 - u;
            if (orient & 2)
                v = 1 - v;
            if (portrait) {
                double t = u;
                u = v;
                v = t;
            }
            float qx, qy;
            ovl_map(w, u, v, &qx, &qy);
            if (have)
                ovl_stroke(w, px, py, qx, qy, wd);
            px = qx;
            py = qy;
            have = 1;
        }
    }
}

static void centre_mark(ovl_window *w)
{
    float cx, cy;
    ovl_map(w, 0.5, 0.5, &cx, &cy);
    float s = (w->fr.h < w->fr.w ? w->fr.h : w->fr.w) * 0.035f;
    float gap = s * 0.35f, wd = (float)line_px(w) + 0.75f;
    ovl_stroke(w, cx - s, cy, cx - gap, cy, wd);
    ovl_stroke(w, cx + gap, cy, cx + s, cy, wd);
    ovl_stroke(w, cx, cy - s, cx, cy - gap, wd);
    ovl_stroke(w, cx, cy + gap, cx, cy + s, wd);
    /* a small diamond: the centre reads as a shape, not a colour */
    ovl_stroke(w, cx - gap, cy, cx, cy - gap, wd * 0.8f);
    ovl_stroke(w, cx, cy - gap, cx + gap, cy, wd * 0.8f);
    ovl_stroke(w, cx + gap, cy, cx, cy + gap, wd * 0.8f);
    ovl_stroke(w, cx, cy + gap, cx - gap, cy, wd * 0.8f);
}

void ovl_horizon_line(const ovl_window *w, double tilt_deg, double v, float *x0, float *y0,
                      float *x1, float *y1)
{
    /* The line sits where the horizon is and leans as it does: + roll means
     * the right end is higher, so on screen (y down) the right end has the
     * smaller y.  A mirrored view shows it leaning the other way. */
    double a = tilt_deg * M_PI / 180.0;
    if (w->mirror)
        a = -a;
    float cx, cy;
    ovl_map(w, 0.5, v, &cx, &cy);
    double half = 0.4 * w->fr.w;
    *x0 = (float)(cx - half * cos(a));
    *y0 = (float)(cy + half * sin(a));
    *x1 = (float)(cx + half * cos(a));
    *y1 = (float)(cy - half * sin(a));
}

static void horizon(ovl_window *w, const coach_result *r)
{
    if (!r || !r->has_tilt)
        return;
    double v = r->has_horizon ? r->horizon_y : 0.5;
    if (!(v > 0.02 && v < 0.98))
        v = 0.5;
    float x0, y0, x1, y1;
    ovl_horizon_line(w, r->tilt_deg, v, &x0, &y0, &x1, &y1);
    int level = fabs(r->tilt_deg) <= OVL_LEVEL_DEG;
    float wd = (float)line_px(w);
    float cy = (y0 + y1) / 2, cx = (x0 + x1) / 2;
    float tick = w->fr.w * 0.04f;
    if (level) {
        /* level look: one heavy sky-blue bar with upright end stops */
        ovl_stroke_col(w, x0, y0, x1, y1, wd + 3.0f, ovl_level);
        float s = w->fr.h * 0.025f;
        ovl_stroke_col(w, x0, y0 - s, x0, y0 + s, wd + 2.0f, ovl_level);
        ovl_stroke_col(w, x1, y1 - s, x1, y1 + s, wd + 2.0f, ovl_level);
    } else {
        /* off level: a dashed line along the measured horizon, and short
         * true-level stubs beyond its ends to compare against */
        float dx = x1 - x0, dy = y1 - y0;
        int n = 21;
        for (int i = 0; i < n; i += 2) {
            float t0 = (float)i / n, t1 = (float)(i + 1) / n;
            ovl_stroke(w, x0 + dx * t0, y0 + dy * t0, x0 + dx * t1, y0 + dy * t1, wd + 1.0f);
        }
        float lx0 = cx - w->fr.w * 0.48f, lx1 = cx + w->fr.w * 0.48f;
        ovl_stroke(w, lx0, cy, lx0 + tick, cy, wd + 1.0f);
        ovl_stroke(w, lx1 - tick, cy, lx1, cy, wd + 1.0f);
    }
    ovl_strokes_flush(w);
    char s[48];
    if (level)
        snprintf(s, sizeof s, "level");
    else
        snprintf(s, sizeof s, "%+.1f°", w->mirror ? -r->tilt_deg : r->tilt_deg);
    /* label above the right stub, clear of the line itself */
    float lx = cx + w->fr.w * 0.46f, ly = cy - (float)w->font_px * 2.2f;
    int tw, th;
    if (w->font && !ovl_text_size(w, w->font_small, s, &tw, &th)) {
        ovl_panel_rect(w, lx - (float)tw - 8, ly - 2, (float)tw + 12, (float)th + 4);
        ovl_text(w, w->font_small, s, lx - 2, ly, 2, level ? ovl_level : ovl_ink);
    }
}

static void crop_mask(ovl_window *w)
{
    if (w->crop <= 0 || w->crop >= OVL_CROP_COUNT)
        return;
    SDL_FRect c = ovl_crop_rect(&w->fr, ovl_crop_ratio[w->crop]);
    const SDL_FRect *r = &w->fr;
    SDL_Color shade = {0, 0, 0, 150};
    ovl_fill(w, r->x, r->y, r->w, c.y - r->y, shade);
    ovl_fill(w, r->x, c.y + c.h, r->w, r->y + r->h - (c.y + c.h), shade);
    ovl_fill(w, r->x, c.y, c.x - r->x, c.h, shade);
    ovl_fill(w, c.x + c.w, c.y, r->x + r->w - (c.x + c.w), c.h, shade);
    /* edges just outside the kept area, so it stays exactly c */
    int t = line_px(w);
    float lo = (float)(-1 - t + t / 2), hi = (float)(1 + t / 2);
    if (c.x > r->x + 1)
        ovl_vline(w, c.x + lo, c.y, c.y + c.h, t, 0);
    if (c.x + c.w < r->x + r->w - 1)
        ovl_vline(w, c.x + c.w + hi, c.y, c.y + c.h, t, 0);
    if (c.y > r->y + 1)
        ovl_hline(w, c.x, c.x + c.w, c.y + lo, t, 0);
    if (c.y + c.h < r->y + r->h - 1)
        ovl_hline(w, c.x, c.x + c.w, c.y + c.h + hi, t, 0);
    int tw, th;
    const char *name = ovl_crop_name[w->crop];
    if (w->font && !ovl_text_size(w, w->font_small, name, &tw, &th)) {
        float lx = c.x + c.w - (float)tw - 10, ly = c.y + 6;
        ovl_panel_rect(w, lx - 4, ly - 2, (float)tw + 8, (float)th + 4);
        ovl_text(w, w->font_small, name, lx, ly, 0, ovl_ink);
    }
}

void ovl_draw_guides(ovl_window *w, const coach_result *r)
{
    const int *g = w->guide;
    if (g[OVL_G_CROP])
        crop_mask(w);
    if (g[OVL_G_THIRDS])
        grid_lines(w, 1.0 / 3.0, 2.0 / 3.0);
    if (g[OVL_G_PHI])
        grid_lines(w, OVL_PHI_A, OVL_PHI_B);
    if (g[OVL_G_DIAGONALS] || g[OVL_G_SPIRAL] || g[OVL_G_CENTRE]) {
        /* these do not move with the picture: drawn once, blended each frame */
        ovl_static_key k;
        memset(&k, 0, sizeof k);
        k.ww = w->ww;
        k.wh = w->wh;
        k.mirror = w->mirror;
        k.diag = g[OVL_G_DIAGONALS];
        k.spiral = g[OVL_G_SPIRAL];
        k.orient = w->spiral_orient;
        k.centre = g[OVL_G_CENTRE];
        k.px = line_px(w);
        k.fx = w->fr.x;
        k.fy = w->fr.y;
        k.fw = w->fr.w;
        k.fh = w->fr.h;
        int built = ovl_static_begin(w, &k);
        if (built > 0) {
            if (g[OVL_G_DIAGONALS])
                diagonals(w);
            if (g[OVL_G_SPIRAL])
                spiral(w, w->spiral_orient);
            if (g[OVL_G_CENTRE])
                centre_mark(w);
        }
        ovl_static_end(w, built);
    }
    ovl_strokes_flush(w);
    if (g[OVL_G_HORIZON])
        horizon(w, r);
}
