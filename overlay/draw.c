/* Drawing primitives: layout of the frame in the window, crisp axis lines,
 * anti-aliased strokes through SDL_RenderGeometry, and the palette. */
#include <math.h>

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

/* Axis lines are whole-pixel rectangles: no blur at any window size. */
void ovl_hline(ovl_window *w, float x0, float x1, float y, int thick)
{
    float yy = floorf(y) - (float)(thick / 2);
    ovl_fill(w, x0, yy - 1, x1 - x0, (float)thick + 2, ovl_casing);
    ovl_fill(w, x0, yy, x1 - x0, (float)thick, ovl_ink);
}

void ovl_vline(ovl_window *w, float x, float y0, float y1, int thick)
{
    float xx = floorf(x) - (float)(thick / 2);
    ovl_fill(w, xx - 1, y0, (float)thick + 2, y1 - y0, ovl_casing);
    ovl_fill(w, xx, y0, (float)thick, y1 - y0, ovl_ink);
}

void ovl_batch_flush(ovl_window *w, ovl_batch *b)
{
    if (b->ni > 0) {
        SDL_SetRenderDrawBlendMode(w->ren, SDL_BLENDMODE_BLEND);
        SDL_RenderGeometry(w->ren, NULL, b->v, b->nv, b->idx, b->ni);
    }
    b->nv = b->ni = 0;
}

static SDL_Vertex vtx(float x, float y, SDL_Color c, Uint8 a)
{
    SDL_Vertex v = {{x, y}, {c.r, c.g, c.b, a}, {0, 0}};
    return v;
}

/* A quad core of the full width plus a one-pixel fringe on each side whose
 * alpha falls to zero: the edge coverage ramp that makes a thin diagonal
 * look smooth without multisampling. */
void ovl_aaline(ovl_batch *b, float x0, float y0, float x1, float y1, float width, SDL_Color c)
{
    float dx = x1 - x0, dy = y1 - y0;
    float len = sqrtf(dx * dx + dy * dy);
    if (len < 1e-3f)
        return;
    if (b->nv + 8 > OVL_BATCH_V || b->ni + 18 > OVL_BATCH_I)
        return; /* the caller flushes often enough; never overflow */
    float nx = -dy / len, ny = dx / len;
    float h = width * 0.5f - 0.5f;
    if (h < 0)
        h = 0;
    float o = h + 1.0f;
    /* extend ends by half a pixel so joined segments leave no gaps */
    float ex = dx / len * 0.5f, ey = dy / len * 0.5f;
    x0 -= ex; y0 -= ey; x1 += ex; y1 += ey;
    int s = b->nv;
    b->v[s + 0] = vtx(x0 + nx * o, y0 + ny * o, c, 0);
    b->v[s + 1] = vtx(x0 + nx * h, y0 + ny * h, c, c.a);
    b->v[s + 2] = vtx(x0 - nx * h, y0 - ny * h, c, c.a);
    b->v[s + 3] = vtx(x0 - nx * o, y0 - ny * o, c, 0);
    b->v[s + 4] = vtx(x1 + nx * o, y1 + ny * o, c, 0);
    b->v[s + 5] = vtx(x1 + nx * h, y1 + ny * h, c, c.a);
    b->v[s + 6] = vtx(x1 - nx * h, y1 - ny * h, c, c.a);
    b->v[s + 7] = vtx(x1 - nx * o, y1 - ny * o, c, 0);
    b->nv += 8;
    static const int tri[18] = {0, 1, 4, 1, 5, 4, 1, 2, 5, 2, 6, 5, 2, 3, 6, 3, 7, 6};
    for (int i = 0; i < 18; i++)
        b->idx[b->ni++] = s + tri[i];
}

static void stroke_room(ovl_window *w)
{
    if (w->casing.nv + 8 > OVL_BATCH_V || w->core.nv + 8 > OVL_BATCH_V)
        ovl_strokes_flush(w);
}

void ovl_stroke_col(ovl_window *w, float x0, float y0, float x1, float y1, float width, SDL_Color c)
{
    stroke_room(w);
    ovl_aaline(&w->casing, x0, y0, x1, y1, width + 2.0f, ovl_casing);
    ovl_aaline(&w->core, x0, y0, x1, y1, width, c);
}

void ovl_stroke(ovl_window *w, float x0, float y0, float x1, float y1, float width)
{
    ovl_stroke_col(w, x0, y0, x1, y1, width, ovl_ink);
}

void ovl_strokes_flush(ovl_window *w)
{
    ovl_batch_flush(w, &w->casing);
    ovl_batch_flush(w, &w->core);
}

void ovl_frame_rect(ovl_window *w, float x, float y, float rw, float rh, float width, SDL_Color c)
{
    ovl_stroke_col(w, x, y, x + rw, y, width, c);
    ovl_stroke_col(w, x + rw, y, x + rw, y + rh, width, c);
    ovl_stroke_col(w, x + rw, y + rh, x, y + rh, width, c);
    ovl_stroke_col(w, x, y + rh, x, y, width, c);
}
