/* Type: finding a sans font through fontconfig, opening it at sizes that
 * follow the window, and a cache of rendered strings so a line is drawn by
 * SDL2_ttf only when its text changes. */
#include <errno.h>
#include <stdio.h>
#include <string.h>
#include <unistd.h>

#include <fontconfig/fontconfig.h>

#include "overlay/overlay_internal.h"

int ovl_font_find(char *buf, size_t n, char *err, size_t errlen)
{
    if (!buf || n == 0)
        return -EINVAL;
    buf[0] = 0;
    int rc = -ENOENT;
    FcConfig *cfg = FcInitLoadConfigAndFonts();
    if (!cfg) {
        snprintf(err, errlen, "fonts: fontconfig could not load its configuration");
        return -ENOENT;
    }
    FcPattern *pat = FcNameParse((const FcChar8 *)"sans-serif");
    if (pat) {
        FcPatternAddBool(pat, FC_SCALABLE, FcTrue);
        FcConfigSubstitute(cfg, pat, FcMatchPattern);
        FcDefaultSubstitute(pat);
        FcResult res;
        FcFontSet *set = FcFontSort(cfg, pat, FcTrue, NULL, &res);
        /* The best match that SDL2_ttf can open: a TrueType/OpenType file. */
        for (int i = 0; set && i < set->nfont && rc; i++) {
            FcChar8 *file = NULL;
            FcBool scalable = FcFalse;
            if (FcPatternGetString(set->fonts[i], FC_FILE, 0, &file) != FcResultMatch)
                continue;
            FcPatternGetBool(set->fonts[i], FC_SCALABLE, 0, &scalable);
            const char *f = (const char *)file;
            size_t len = strlen(f);
            int ttf = len > 4 && (!strcasecmp(f + len - 4, ".ttf") || !strcasecmp(f + len - 4, ".otf") ||
                                  !strcasecmp(f + len - 4, ".ttc"));
            if (scalable && ttf && len < n && access(f, R_OK) == 0) {
                memcpy(buf, f, len + 1);
                rc = 0;
            }
        }
        if (set)
            FcFontSetDestroy(set);
        FcPatternDestroy(pat);
    }
    FcConfigDestroy(cfg);
    if (rc)
        snprintf(err, errlen, "fonts: no sans-serif TrueType font found through fontconfig "
                              "(install one, e.g. fonts-dejavu-core)");
    return rc;
}

static int font_px_for(const ovl_window *w)
{
    int px = w->wh / 42;
    if (w->presenter)
        px = px * 17 / 10;
    if (px < 13)
        px = 13;
    if (px > 72)
        px = 72;
    return px;
}

void ovl_text_flush(ovl_window *w)
{
    for (int i = 0; i < OVL_TEXT_SLOTS; i++) {
        if (w->text[i].tex)
            SDL_DestroyTexture(w->text[i].tex);
        memset(&w->text[i], 0, sizeof w->text[i]);
    }
}

void ovl_fonts_close(ovl_window *w)
{
    ovl_text_flush(w);
    if (w->font)
        TTF_CloseFont(w->font);
    if (w->font_big)
        TTF_CloseFont(w->font_big);
    if (w->font_small)
        TTF_CloseFont(w->font_small);
    w->font = w->font_big = w->font_small = NULL;
    w->font_px = 0;
}

/* Opens the fonts at the size the window calls for; a no-op when it has
 * not changed (called every draw, cheap). */
int ovl_fonts_open(ovl_window *w, char *err, size_t errlen)
{
    int px = font_px_for(w);
    if (px == w->font_px && w->font)
        return 0;
    ovl_fonts_close(w);
    w->font = TTF_OpenFont(w->font_path, px);
    w->font_big = TTF_OpenFont(w->font_path, px * 2);
    w->font_small = TTF_OpenFont(w->font_path, px * 4 / 5 > 11 ? px * 4 / 5 : 11);
    if (!w->font || !w->font_big || !w->font_small) {
        if (err)
            snprintf(err, errlen, "font '%s': cannot open: %s", w->font_path, TTF_GetError());
        ovl_fonts_close(w);
        return -ENOENT;
    }
    TTF_SetFontStyle(w->font_big, TTF_STYLE_BOLD);
    w->font_px = px;
    return 0;
}

int ovl_text_size(ovl_window *w, TTF_Font *font, const char *s, int *tw, int *th)
{
    (void)w;
    if (!font || !s || !*s) {
        *tw = 0;
        *th = font ? TTF_FontHeight(font) : 0;
        return 0;
    }
    return TTF_SizeUTF8(font, s, tw, th);
}

static ovl_text_slot *text_get(ovl_window *w, TTF_Font *font, const char *s, SDL_Color c)
{
    ovl_text_slot *lru = &w->text[0];
    for (int i = 0; i < OVL_TEXT_SLOTS; i++) {
        ovl_text_slot *t = &w->text[i];
        if (t->tex && t->font == font && t->c.r == c.r && t->c.g == c.g && t->c.b == c.b &&
            t->c.a == c.a && !strcmp(t->s, s)) {
            t->used = w->draws;
            return t;
        }
        if (!t->tex || (lru->tex && t->used < lru->used))
            lru = t;
    }
    /* Not cached: render it once into the least recently used slot. */
    if (lru->tex)
        SDL_DestroyTexture(lru->tex);
    memset(lru, 0, sizeof *lru);
    SDL_Surface *surf = TTF_RenderUTF8_Blended(font, s, c);
    if (!surf)
        return NULL;
    lru->tex = SDL_CreateTextureFromSurface(w->ren, surf);
    lru->w = surf->w;
    lru->h = surf->h;
    SDL_FreeSurface(surf);
    if (!lru->tex)
        return NULL;
    SDL_SetTextureBlendMode(lru->tex, SDL_BLENDMODE_BLEND);
    snprintf(lru->s, sizeof lru->s, "%s", s);
    lru->font = font;
    lru->c = c;
    lru->used = w->draws;
    return lru;
}

int ovl_text(ovl_window *w, TTF_Font *font, const char *s, float x, float y, int align, SDL_Color c)
{
    if (!font || !s || !*s)
        return 0;
    ovl_text_slot *t = text_get(w, font, s, c);
    if (!t)
        return 0;
    float dx = align == 1 ? -(float)t->w / 2 : align == 2 ? -(float)t->w : 0;
    SDL_FRect d = {floorf(x + dx), floorf(y), (float)t->w, (float)t->h};
    SDL_RenderCopyF(w->ren, t->tex, NULL, &d);
    return t->w;
}

void ovl_panel_rect(ovl_window *w, float x, float y, float rw, float rh)
{
    /* A one-pixel inset on the corners reads as rounded at small sizes. */
    ovl_fill(w, x + 1, y, rw - 2, 1, ovl_panel);
    ovl_fill(w, x, y + 1, rw, rh - 2, ovl_panel);
    ovl_fill(w, x + 1, y + rh - 1, rw - 2, 1, ovl_panel);
}
