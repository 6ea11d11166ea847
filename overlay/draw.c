/* Drawing primitives: layout of the frame in the window, crisp axis lines,
 * anti-aliased strokes rasterised into a tiled layer, and the palette. */
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "overlay/overlay_internal.h"

/* A palette of our own.  Every guide is a light core over a dark casing so
 * it reads over bright and dark scenes alike; states differ by shape and
 * luminance, never by a red/green contrast alone. */
const SDL_Color ovl_ink = {246, 241, 226, 235};
const SDL_Color ovl_casing = {14, 16, 22, 150};
const SDL_Color ovl_panel = {12, 14, 20, 190};
const SDL_Color ovl_dimtext = {178, 184, 196, 255};
const SDL_Color ovl_accent = {255, 182, 28, 255};
const SDL_Color ovl_level = {96, 200, 255, 255};
const SDL_Color ovl_zebra = {34, 16, 96, 215};
const SDL_Color ovl_peak[OVL_PEAK_COLOURS] = {
    {255, 56, 214, 255}, /* magenta */
    {255, 236, 40, 255}, /* yellow  */
    {40, 230, 255, 255}, /* cyan    */
};

SDL_FRect ovl_fit_rect(int fw, int fh, int ww, int wh)
{
    SDL_FRect r = {0, 0, (float)ww, (float)wh};
    if (fw <= 0 || fh <= 0 || ww <= 0 || wh <= 0)
        return r;
    /* Whole pixels: the frame edges and the guides stay crisp. */
    if ((double)ww * fh > (double)wh * fw) {
        int w = (int)lround((double)wh * fw / fh);
        r.x = (float)lround((ww - w) / 2.0);
        r.w = (float)w;
    } else {
        int h = (int)lround((double)ww * fh / fw);
        r.y = (float)lround((wh - h) / 2.0);
        r.h = (float)h;
    }
    return r;
}

SDL_FRect ovl_crop_rect(const SDL_FRect *r, double ratio)
{
    SDL_FRect c = *r;
    if (!(ratio > 0) || r->w <= 0 || r->h <= 0)
        return c;
    if ((double)r->w / r->h > ratio) {
        double w = r->h * ratio;
        c.x = (float)(r->x + floor((r->w - w) / 2));
        c.w = (float)lround(w);
    } else {
        double h = r->w / ratio;
        c.y = (float)(r->y + floor((r->h - h) / 2));
        c.h = (float)lround(h);
    }
    return c;
}

void ovl_map(const ovl_window *w, double u, double v, float *x, float *y)
{
    if (w->mirror)
        u = 1.0 - u;
    *x = (float)(w->fr.x + u * w->fr.w);
    *y = (float)(w->fr.y + v * w->fr.h);
}

void ovl_fill(ovl_window *w, float x, float y, float rw, float rh, SDL_Color c)
{
    if (rw <= 0 || rh <= 0)
        return;
    SDL_SetRenderDrawColor(w->ren, c.r, c.g, c.b, c.a);
    SDL_FRect r = {x, y, rw, rh};
    SDL_RenderFillRectF(w->ren, &r);
}

/* Axis lines are whole-pixel rectangles: no blur at any window size.
 * pass 1 draws the casing only, 2 the core only, 0 both. */
void ovl_hline(ovl_window *w, float x0, float x1, float y, int thick, int pass)
{
    float yy = floorf(y) - (float)(thick / 2);
    if (pass != 2)
        ovl_fill(w, x0, yy - 1, x1 - x0, (float)thick + 2, ovl_casing);
    if (pass != 1)
        ovl_fill(w, x0, yy, x1 - x0, (float)thick, ovl_ink);
}

void ovl_vline(ovl_window *w, float x, float y0, float y1, int thick, int pass)
{
    float xx = floorf(x) - (float)(thick / 2);
    if (pass != 2)
        ovl_fill(w, xx - 1, y0, (float)thick + 2, y1 - y0, ovl_casing);
    if (pass != 1)
        ovl_fill(w, xx, y0, (float)thick, y1 - y0, ovl_ink);
}

static void seg_add(ovl_window *w, ovl_seg *list, int *n, float x0, float y0, float x1, float y1, float width,
                    SDL_Color c)
{
    if (*n >= OVL_SEGS)
        ovl_strokes_flush(w);
    list[(*n)++] = (ovl_seg){x0, y0, x1, y1, width * 0.5f, c};
}

void ovl_stroke_col(ovl_window *w, float x0, float y0, float x1, float y1, float width, SDL_Color c)
{
    ovl_layer *l = w->target ? w->target : &w->layer;
    if (l->ncasing >= OVL_SEGS || l->ncore >= OVL_SEGS)
        ovl_strokes_flush(w);
    seg_add(w, l->casing, &l->ncasing, x0, y0, x1, y1, width + 2.0f, ovl_casing);
    seg_add(w, l->core, &l->ncore, x0, y0, x1, y1, width, c);
}

void ovl_stroke(ovl_window *w, float x0, float y0, float x1, float y1, float width)
{
    ovl_stroke_col(w, x0, y0, x1, y1, width, ovl_ink);
}

void ovl_stroke_plain(ovl_window *w, float x0, float y0, float x1, float y1, float width, SDL_Color c)
{
    ovl_layer *l = w->target ? w->target : &w->layer;
    seg_add(w, l->core, &l->ncore, x0, y0, x1, y1, width, c);
}

void ovl_layer_free(ovl_layer *l)
{
    if (l->tex)
        SDL_DestroyTexture(l->tex);
    free(l->px);
    free(l->tile);
    l->tex = NULL;
    l->px = NULL;
    l->tile = NULL;
    l->w = l->h = 0;
}

/* Buffers follow the window size: reallocated on resize only. */
static int layer_fit(ovl_window *w, ovl_layer *l)
{
    if (l->px && l->w == w->ww && l->h == w->wh)
        return 0;
    ovl_layer_free(l);
    l->w = w->ww;
    l->h = w->wh;
    l->tx = (l->w + OVL_TILE - 1) / OVL_TILE;
    l->ty = (l->h + OVL_TILE - 1) / OVL_TILE;
    l->px = calloc((size_t)l->w * l->h, sizeof(uint32_t));
    l->tile = calloc((size_t)l->tx * l->ty, 1);
    l->tex = SDL_CreateTexture(w->ren, SDL_PIXELFORMAT_ARGB8888, SDL_TEXTUREACCESS_STREAMING, l->w, l->h);
    if (!l->px || !l->tile || !l->tex) {
        ovl_layer_free(l);
        return -1;
    }
    SDL_SetTextureBlendMode(l->tex, SDL_BLENDMODE_BLEND);
    return 0;
}

/* Straight-alpha "over"; the same colour combines by maximum instead, so
 * joints of a polyline (and crossings of one kind of line) do not darken. */
static inline void put(uint32_t *p, SDL_Color c, float cov)
{
    unsigned sa = (unsigned)((float)c.a * cov + 0.5f);
    if (!sa)
        return;
    uint32_t d = *p, rgb = ((uint32_t)c.r << 16) | ((uint32_t)c.g << 8) | c.b;
    unsigned da = d >> 24;
    if (!da || (d & 0xffffffu) == rgb) {
        if (sa > da)
            *p = ((uint32_t)sa << 24) | rgb;
        return;
    }
    unsigned k = da * (255 - sa) / 255, oa = sa + k;
    unsigned r = (c.r * sa + ((d >> 16) & 255) * k) / oa;
    unsigned g = (c.g * sa + ((d >> 8) & 255) * k) / oa;
    unsigned b = (c.b * sa + (d & 255) * k) / oa;
    *p = ((uint32_t)oa << 24) | (r << 16) | (g << 8) | b;
}

/* Coverage of each pixel centre by a segment of half width r with round
 * ends: clamp(r + 0.5 - distance, 0, 1), a one-pixel linear ramp. */
static void raster(ovl_layer *l, const ovl_seg *s)
{
    float x0 = s->x0, y0 = s->y0, x1 = s->x1, y1 = s->y1, r = s->r;
    float R = r + 0.5f;
    float dx = x1 - x0, dy = y1 - y0, len2 = dx * dx + dy * dy;
    float len = sqrtf(len2);
    float nx = len > 1e-4f ? -dy / len : 0, ny = len > 1e-4f ? dx / len : 1;
    int ya = (int)floorf(fminf(y0, y1) - R), yb = (int)ceilf(fmaxf(y0, y1) + R);
    int bx0 = (int)floorf(fminf(x0, x1) - R), bx1 = (int)ceilf(fmaxf(x0, x1) + R);
    if (ya < 0)
        ya = 0;
    if (yb > l->h - 1)
        yb = l->h - 1;
    if (bx0 < 0)
        bx0 = 0;
    if (bx1 > l->w - 1)
        bx1 = l->w - 1;
    for (int y = ya; y <= yb; y++) {
        float cy = (float)y + 0.5f;
        int xa = bx0, xb = bx1;
        if (fabsf(nx) > 1e-3f) {
            /* the band |(p - a) . n| <= R crosses this row in one interval */
            float u0 = x0 + (-R - (cy - y0) * ny) / nx, u1 = x0 + (R - (cy - y0) * ny) / nx;
            if (u0 > u1) {
                float t = u0;
                u0 = u1;
                u1 = t;
            }
            int ia = (int)floorf(u0 - 0.5f), ib = (int)ceilf(u1);
            if (ia > xa)
                xa = ia;
            if (ib < xb)
                xb = ib;
        }
        if (xa > xb)
            continue;
        uint32_t *row = l->px + (size_t)y * l->w;
        for (int x = xa; x <= xb; x++) {
            float cx = (float)x + 0.5f;
            float t = len2 > 0 ? ((cx - x0) * dx + (cy - y0) * dy) / len2 : 0;
            t = t < 0 ? 0 : t > 1 ? 1 : t;
            float ex = x0 + t * dx - cx, ey = y0 + t * dy - cy;
            float cov = r + 0.5f - sqrtf(ex * ex + ey * ey);
            if (cov <= 0)
                continue;
            put(row + x, s->c, cov > 1 ? 1 : cov);
        }
        uint8_t *tr = l->tile + (size_t)(y / OVL_TILE) * l->tx;
        for (int t = xa / OVL_TILE; t <= xb / OVL_TILE; t++)
            tr[t] = 1;
    }
}

static void layer_raster(ovl_layer *l)
{
    for (int i = 0; i < l->ncasing; i++)
        raster(l, &l->casing[i]);
    for (int i = 0; i < l->ncore; i++)
        raster(l, &l->core[i]);
    l->ncasing = l->ncore = 0;
}

/* Blends runs of touched tiles; upload: copy them to the texture first;
 * clear: empty them afterwards (for the next strokes). */
static void layer_blit(ovl_window *w, ovl_layer *l, int upload, int clear)
{
    for (int ty = 0; ty < l->ty; ty++) {
        uint8_t *tr = l->tile + (size_t)ty * l->tx;
        for (int tx = 0; tx < l->tx;) {
            if (!tr[tx]) {
                tx++;
                continue;
            }
            int e = tx;
            while (e < l->tx && tr[e])
                e++;
            SDL_Rect rc = {tx * OVL_TILE, ty * OVL_TILE, (e - tx) * OVL_TILE, OVL_TILE};
            if (rc.x + rc.w > l->w)
                rc.w = l->w - rc.x;
            if (rc.y + rc.h > l->h)
                rc.h = l->h - rc.y;
            uint32_t *p0 = l->px + (size_t)rc.y * l->w + rc.x;
            if (upload)
                SDL_UpdateTexture(l->tex, &rc, p0, l->w * 4);
            SDL_RenderCopy(w->ren, l->tex, &rc, &rc);
            if (clear) {
                for (int y = 0; y < rc.h; y++)
                    memset(p0 + (size_t)y * l->w, 0, (size_t)rc.w * 4);
                memset(tr + tx, 0, (size_t)(e - tx));
            }
            tx = e;
        }
    }
}

void ovl_strokes_flush(ovl_window *w)
{
    ovl_layer *l = &w->layer;
    if (w->target) {
        layer_raster(w->target); /* a static layer in the making: keep it */
        return;
    }
    if (!l->ncasing && !l->ncore)
        return;
    if (layer_fit(w, l)) {
        l->ncasing = l->ncore = 0;
        return;
    }
    layer_raster(l);
    layer_blit(w, l, 1, 1);
}

int ovl_static_begin(ovl_window *w, const ovl_static_key *key)
{
    ovl_layer *l = &w->stat;
    if (w->stat_valid && l->px && l->w == w->ww && l->h == w->wh && !memcmp(key, &w->stat_key, sizeof *key))
        return 0;
    w->stat_valid = 0;
    if (layer_fit(w, l))
        return -1;
    memset(l->px, 0, (size_t)l->w * l->h * sizeof(uint32_t));
    memset(l->tile, 0, (size_t)l->tx * l->ty);
    l->ncasing = l->ncore = 0;
    w->stat_key = *key;
    w->target = l;
    return 1;
}

void ovl_static_end(ovl_window *w, int built)
{
    ovl_layer *l = &w->stat;
    w->target = NULL;
    if (built > 0) {
        layer_raster(l);
        w->stat_valid = 1;
    }
    if (w->stat_valid)
        layer_blit(w, l, built > 0, 0);
}

void ovl_frame_rect(ovl_window *w, float x, float y, float rw, float rh, float width, SDL_Color c)
{
    ovl_stroke_col(w, x, y, x + rw, y, width, c);
    ovl_stroke_col(w, x + rw, y, x + rw, y + rh, width, c);
    ovl_stroke_col(w, x + rw, y + rh, x, y + rh, width, c);
    ovl_stroke_col(w, x, y + rh, x, y, width, c);
}
