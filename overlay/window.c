/* The window: creation (normal or presenter), frame upload, the draw order,
 * keys, the help overlay, the ready tone and the screenshot readback. */
#include <dirent.h>
#include <errno.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>
#include <unistd.h>

#include <SDL_image.h>

#include "overlay/overlay_internal.h"

/* ---- the key map ------------------------------------------------------------ */

typedef struct ovl_key {
    const char *keys, *what;
} ovl_key;

static const ovl_key key_help[] = {
    {"1", "rule of thirds"},
    {"2", "phi grid"},
    {"3", "diagonals"},
    {"4", "golden spiral; again: turn it"},
    {"5", "centre mark"},
    {"6", "level line (artificial horizon)"},
    {"7", "crop 1:1 → 4:5 → 3:2 → 16:9 → off"},
    {"0", "all guides off"},
    {"Tab", "next guide, shown alone"},
    {"L", "histogram: luma → RGB → off"},
    {"Z", "zebras on clipped highlights"},
    {"F / K", "focus peaking / its colour"},
    {"B", "subject box and arrow"},
    {"W", "hints in words"},
    {"E", "explain the score"},
    {"I", "window stats"},
    {"Space / S", "save a snapshot"},
    {"P", "next profile"},
    {"M", "mirror"},
    {"T", "ready tone"},
    {"F11", "fullscreen"},
    {"H / F1", "this help"},
    {"Esc / Q", "close help, quit"},
};

/* ---- show lists --------------------------------------------------------------- */

static void show_none(ovl_window *w)
{
    memset(w->guide, 0, sizeof w->guide);
    w->crop = 0;
    w->hist_mode = 0;
    w->zebras = w->peaking = w->subject = w->meter = w->hints = w->label = 0;
    w->explain = w->help = w->stats = 0;
}

int ovl_show_parse(ovl_window *w, const char *list, char *err, size_t errlen)
{
    show_none(w);
    const char *p = list;
    while (p && *p) {
        const char *e = strchr(p, ',');
        size_t n = e ? (size_t)(e - p) : strlen(p);
        char it[40];
        if (n >= sizeof it) {
            snprintf(err, errlen, "show list: item '%.*s' is too long", (int)(n > 60 ? 60 : n), p);
            return -EINVAL;
        }
        memcpy(it, p, n);
        it[n] = 0;
        p = e ? e + 1 : NULL;
        int ok = 1;
        if (!strcmp(it, "none") || !it[0])
            ;
        else if (!strcmp(it, "thirds")) w->guide[OVL_G_THIRDS] = 1;
        else if (!strcmp(it, "phi")) w->guide[OVL_G_PHI] = 1;
        else if (!strcmp(it, "diagonals")) w->guide[OVL_G_DIAGONALS] = 1;
        else if (!strncmp(it, "spiral", 6) && (!it[6] || (it[6] == ':' && it[7] >= '0' && it[7] <= '3' && !it[8]))) {
            w->guide[OVL_G_SPIRAL] = 1;
            w->spiral_orient = it[6] ? it[7] - '0' : 0;
        } else if (!strcmp(it, "centre") || !strcmp(it, "center")) w->guide[OVL_G_CENTRE] = 1;
        else if (!strcmp(it, "horizon")) w->guide[OVL_G_HORIZON] = 1;
        else if (!strncmp(it, "crop:", 5)) {
            ok = 0;
            for (int i = 1; i < OVL_CROP_COUNT; i++)
                if (!strcmp(it + 5, ovl_crop_name[i])) {
                    w->crop = i;
                    w->guide[OVL_G_CROP] = 1;
                    ok = 1;
                }
        } else if (!strcmp(it, "histogram")) w->hist_mode = 1;
        else if (!strcmp(it, "histogram-rgb")) w->hist_mode = 2;
        else if (!strcmp(it, "zebras")) w->zebras = 1;
        else if (!strcmp(it, "peaking")) w->peaking = 1;
        else if (!strcmp(it, "subject")) w->subject = 1;
        else if (!strcmp(it, "meter")) w->meter = 1;
        else if (!strcmp(it, "hints")) w->hints = 1;
        else if (!strcmp(it, "label")) w->label = 1;
        else if (!strcmp(it, "explain")) w->explain = 1;
        else if (!strcmp(it, "help")) w->help = 1;
        else if (!strcmp(it, "stats")) w->stats = 1;
        else ok = 0;
        if (!ok) {
            snprintf(err, errlen, "show list: unknown item '%s' (thirds, phi, diagonals, spiral[:0-3], "
                                  "centre, horizon, crop:1:1|4:5|3:2|16:9, histogram, histogram-rgb, zebras, "
                                  "peaking, subject, meter, hints, label, explain, help, stats, none)", it);
            return -EINVAL;
        }
    }
    return 0;
}

/* ---- tone ------------------------------------------------------------------------ */

/* A 150 ms two-partial chime (880 Hz and its fifth) with soft ends: short
 * and quiet enough not to startle the person in front of the camera. */
static int tone_open(ovl_window *w)
{
    if (w->audio)
        return 0;
    if (!SDL_WasInit(SDL_INIT_AUDIO) && SDL_InitSubSystem(SDL_INIT_AUDIO) != 0)
        return -ENODEV;
    SDL_AudioSpec want, have;
    SDL_zero(want);
    want.freq = 48000;
    want.format = AUDIO_S16SYS;
    want.channels = 1;
    want.samples = 1024;
    w->audio = SDL_OpenAudioDevice(NULL, 0, &want, &have, 0);
    if (!w->audio)
        return -ENODEV;
    int n = want.freq * 150 / 1000;
    free(w->tone_buf);
    w->tone_buf = malloc((size_t)n * sizeof(int16_t));
    if (!w->tone_buf) {
        SDL_CloseAudioDevice(w->audio);
        w->audio = 0;
        return -ENOMEM;
    }
    for (int i = 0; i < n; i++) {
        double t = (double)i / want.freq;
        double env = fmin(1.0, fmin(t / 0.01, ((double)(n - i) / want.freq) / 0.06));
        double s = 0.6 * sin(2 * M_PI * 880 * t) + 0.4 * sin(2 * M_PI * 1320 * t);
        w->tone_buf[i] = (int16_t)(6000.0 * env * s);
    }
    w->tone_bytes = (Uint32)(n * (int)sizeof(int16_t));
    SDL_PauseAudioDevice(w->audio, 0);
    return 0;
}

static void tone_play(ovl_window *w)
{
    if (!w->tone || !w->audio)
        return;
    SDL_ClearQueuedAudio(w->audio);
    SDL_QueueAudio(w->audio, w->tone_buf, w->tone_bytes);
}

/* ---- create / destroy -------------------------------------------------------------- */

void ovl_notice(ovl_window *w, const char *text)
{
    if (!w || !text)
        return;
    snprintf(w->notice, sizeof w->notice, "%s", text);
    w->notice_until = SDL_GetTicks64() + 4000;
}

int ovl_mirrored(const ovl_window *w)
{
    return w ? w->mirror : 0;
}

static void update_size(ovl_window *w)
{
    int ww = 0, wh = 0;
    if (SDL_GetRendererOutputSize(w->ren, &ww, &wh) == 0 && ww > 0 && wh > 0) {
        w->ww = ww;
        w->wh = wh;
    }
}

/* Is the current OpenGL context drawn by a CPU rasteriser (Mesa's
 * llvmpipe/softpipe/swrast)?  Then SDL's own software renderer, presenting
 * through X11 shared memory, is the faster path. */
static int gl_on_cpu(void)
{
    typedef const unsigned char *(*get_string_fn)(unsigned);
    get_string_fn get = (get_string_fn)SDL_GL_GetProcAddress("glGetString");
    if (!get || !SDL_GL_GetCurrentContext())
        return 0;
    const char *r = (const char *)get(0x1F01u); /* GL_RENDERER */
    return r && (strstr(r, "llvmpipe") || strstr(r, "softpipe") || strstr(r, "Software Rasterizer") ||
                 strstr(r, "swrast"));
}

static SDL_Renderer *software_renderer(SDL_Window *win)
{
    /* Present the software renderer's surface straight to the window, not
     * through another (GL) renderer; the environment still overrides. */
    SDL_SetHintWithPriority(SDL_HINT_FRAMEBUFFER_ACCELERATION, "0", SDL_HINT_DEFAULT);
    return SDL_CreateRenderer(win, -1, SDL_RENDERER_SOFTWARE);
}

/* Any DRM render node (/dev/dri/renderD128...)?  Without one there is no
 * GPU to draw with, and loading a GL driver only to find that out costs
 * start-up time, memory and two idle rasteriser threads. */
static int have_render_node(void)
{
    DIR *d = opendir("/dev/dri");
    if (!d)
        return 0;
    int found = 0;
    struct dirent *e;
    while (!found && (e = readdir(d)))
        found = !strncmp(e->d_name, "renderD", 7);
    closedir(d);
    return found;
}

static SDL_Renderer *make_renderer(SDL_Window *win)
{
    const char *want = SDL_GetHint(SDL_HINT_RENDER_DRIVER);
    if ((want && !strcmp(want, "software")) || (!want && !have_render_node()))
        return software_renderer(win);
    SDL_Renderer *r = SDL_CreateRenderer(win, -1, 0);
    SDL_RendererInfo info;
    if (r && !want && SDL_GetRendererInfo(r, &info) == 0 && !strncmp(info.name, "opengl", 6) && gl_on_cpu()) {
        SDL_DestroyRenderer(r);
        r = NULL;
    }
    return r ? r : software_renderer(win);
}

ovl_window *ovl_create(const ovl_opts *o, char *err, size_t errlen)
{
    char dummy[8];
    if (!err) {
        err = dummy;
        errlen = sizeof dummy;
    }
    if (!o) {
        snprintf(err, errlen, "window: no options given");
        return NULL;
    }
    if (!SDL_WasInit(SDL_INIT_VIDEO)) {
        snprintf(err, errlen, "window: SDL video is not initialised");
        return NULL;
    }
    ovl_window *w = calloc(1, sizeof *w);
    if (!w) {
        snprintf(err, errlen, "window: out of memory");
        return NULL;
    }
    w->presenter = o->presenter;
    w->mirror = o->mirror;
    w->tone = o->tone;
    w->grid = o->grid == COACH_GRID_PHI ? COACH_GRID_PHI : COACH_GRID_THIRDS;
    w->peak_threshold = 64;
    w->present_guide = -1;
    coach_config cfg;
    coach_config_default(&cfg);
    w->ready_enter = cfg.ready_enter > 0 && cfg.ready_enter <= 100 ? cfg.ready_enter : 75;

    if (o->font_path) {
        if (access(o->font_path, R_OK) != 0) {
            snprintf(err, errlen, "font '%s': %s", o->font_path, strerror(errno));
            goto fail;
        }
        snprintf(w->font_path, sizeof w->font_path, "%s", o->font_path);
    } else if (ovl_font_find(w->font_path, sizeof w->font_path, err, errlen)) {
        goto fail;
    }
    if (!TTF_WasInit() && TTF_Init() != 0) {
        snprintf(err, errlen, "fonts: SDL2_ttf cannot start: %s", TTF_GetError());
        goto fail;
    }

    const char *show = o->show;
    if (!show)
        show = w->presenter ? "thirds,horizon,meter,hints" : "thirds,horizon,subject,meter,hints,label";
    if (ovl_show_parse(w, show, err, errlen))
        goto fail;
    if (o->stats)
        w->stats = 1;
    if (w->presenter) {
        /* one guide at a time: keep the first one asked for */
        int first = -1;
        for (int i = 0; i < OVL_G_COUNT; i++)
            if (w->guide[i] && i != OVL_G_HORIZON) {
                if (first < 0)
                    first = i;
                else
                    w->guide[i] = 0;
            }
        w->present_guide = first;
    }

    int ww = o->width > 0 ? o->width : 1280, wh = o->height > 0 ? o->height : 720;
    Uint32 flags = SDL_WINDOW_RESIZABLE | SDL_WINDOW_ALLOW_HIGHDPI | (o->hidden ? SDL_WINDOW_HIDDEN : 0);
    int pos = SDL_WINDOWPOS_CENTERED;
    if (w->presenter) {
        int nd = SDL_GetNumVideoDisplays();
        if (o->display < 0 || o->display >= nd) {
            snprintf(err, errlen, "presenter: display %d not found (%d display%s: 0..%d)", o->display, nd,
                     nd == 1 ? "" : "s", nd - 1);
            goto fail;
        }
        pos = (int)SDL_WINDOWPOS_CENTERED_DISPLAY(o->display);
        flags |= SDL_WINDOW_FULLSCREEN_DESKTOP;
    }
    w->win = SDL_CreateWindow(o->title ? o->title : "vfcoach", pos, pos, ww, wh, flags);
    if (!w->win) {
        snprintf(err, errlen, "window: cannot create it: %s", SDL_GetError());
        goto fail;
    }
    SDL_SetWindowMinimumSize(w->win, 320, 200);
    w->ren = make_renderer(w->win);
    if (!w->ren) {
        snprintf(err, errlen, "window: no renderer: %s", SDL_GetError());
        goto fail;
    }
    SDL_RendererInfo info;
    if (SDL_GetRendererInfo(w->ren, &info) == 0) {
        snprintf(w->renderer_name, sizeof w->renderer_name, "%s", info.name);
        w->software = (info.flags & SDL_RENDERER_SOFTWARE) != 0;
    }
    SDL_SetRenderDrawBlendMode(w->ren, SDL_BLENDMODE_BLEND);
    update_size(w);
    if (ovl_fonts_open(w, err, errlen))
        goto fail;
    if (o->screenshot) {
        snprintf(w->shot_path, sizeof w->shot_path, "%s", o->screenshot);
        w->shot_after = o->screenshot_after > 0 ? o->screenshot_after : 30;
    }
    if (w->tone && tone_open(w)) {
        w->tone = 0;
        ovl_notice(w, "No audio device: the ready tone is off.");
    }
    return w;
fail:
    ovl_destroy(w);
    return NULL;
}

void ovl_destroy(ovl_window *w)
{
    if (!w)
        return;
    if (w->stats && w->frames > 0)
        fprintf(stderr, "vfcoach: window: %llu frames shown, drawing %.2f ms a frame (%.2f ms CPU), %s renderer\n",
                (unsigned long long)w->frames, w->sum_ms / (double)w->frames, w->sum_cpu_ms / (double)w->frames,
                w->renderer_name);
    if (w->audio)
        SDL_CloseAudioDevice(w->audio);
    free(w->tone_buf);
    ovl_fonts_close(w);
    ovl_layer_free(&w->layer);
    ovl_layer_free(&w->stat);
    if (w->frame_tex)
        SDL_DestroyTexture(w->frame_tex);
    if (w->ren)
        SDL_DestroyRenderer(w->ren);
    if (w->win)
        SDL_DestroyWindow(w->win);
    free(w->mask);
    free(w->mask_sx);
    free(w);
}

/* ---- frame upload ------------------------------------------------------------------- */

static Uint32 sdl_format(coach_format f)
{
    switch (f) {
    case COACH_FMT_XRGB8888: return SDL_PIXELFORMAT_XRGB8888;
    case COACH_FMT_RGB24: return SDL_PIXELFORMAT_RGB24;
    case COACH_FMT_BGR24: return SDL_PIXELFORMAT_BGR24;
    case COACH_FMT_YUYV: return SDL_PIXELFORMAT_YUY2;
    case COACH_FMT_NV12: return SDL_PIXELFORMAT_NV12;
    case COACH_FMT_GREY: return SDL_PIXELFORMAT_XRGB8888; /* expanded while copying */
    default: return SDL_PIXELFORMAT_UNKNOWN;
    }
}

/* Copies the frame into the streaming texture (rows may be padded on
 * either side) and paints the zebra/peaking marks on the way. */
static int upload(ovl_window *w, const coach_frame *f)
{
    Uint32 fmt = sdl_format(f->format);
    if (fmt == SDL_PIXELFORMAT_UNKNOWN || !f->data || f->w <= 0 || f->h <= 0)
        return -EINVAL;
    if (!w->frame_tex || w->frame_fmt != fmt || w->fw != f->w || w->fh != f->h) {
        if (w->frame_tex)
            SDL_DestroyTexture(w->frame_tex);
        w->frame_tex = SDL_CreateTexture(w->ren, fmt, SDL_TEXTUREACCESS_STREAMING, f->w, f->h);
        if (!w->frame_tex) {
            w->fw = w->fh = 0;
            return -ENOMEM;
        }
        /* bilinear: a nearest-neighbour downscale shimmers on fine
         * texture (water, foliage); it costs ~1.5 ms a 720p frame in
         * software */
        SDL_SetTextureScaleMode(w->frame_tex, SDL_ScaleModeLinear);
        w->frame_fmt = fmt;
        w->fw = f->w;
        w->fh = f->h;
    }
    if (f->format == COACH_FMT_YUYV || f->format == COACH_FMT_NV12) {
        /* SDL2 knows full range only for BT.601 ("JPEG"); BT.709 full range
         * is rare from webcams and shows close enough. */
        SDL_SetYUVConversionMode(f->range == COACH_RANGE_FULL ? SDL_YUV_CONVERSION_JPEG
                                 : f->matrix == COACH_MATRIX_BT709 ? SDL_YUV_CONVERSION_BT709
                                                                   : SDL_YUV_CONVERSION_BT601);
    }
    void *pix;
    int pitch;
    if (SDL_LockTexture(w->frame_tex, NULL, &pix, &pitch) != 0)
        return -EIO;
    uint8_t *dst = pix;
    int h = f->h;
    if (f->format == COACH_FMT_GREY) {
        for (int y = 0; y < h; y++) {
            const uint8_t *s = f->data + (size_t)y * f->stride;
            uint32_t *d = (uint32_t *)(dst + (size_t)y * pitch);
            for (int x = 0; x < f->w; x++)
                d[x] = 0xff000000u | (uint32_t)s[x] * 0x010101u;
        }
    } else {
        size_t row = (size_t)f->w * (size_t)coach_format_bpp(f->format);
        if (f->format == COACH_FMT_NV12)
            row = (size_t)f->w;
        for (int y = 0; y < h; y++)
            memcpy(dst + (size_t)y * pitch, f->data + (size_t)y * f->stride, row);
        if (f->format == COACH_FMT_NV12) {
            const uint8_t *uv = f->data2 ? f->data2 : f->data + (size_t)f->stride * h;
            int s2 = f->stride2 ? f->stride2 : f->stride;
            int uvpitch = (pitch + 1) & ~1;
            uint8_t *d2 = dst + (size_t)pitch * h;
            size_t uvrow = (size_t)((f->w + 1) & ~1);
            for (int y = 0; y < (h + 1) / 2; y++)
                memcpy(d2 + (size_t)y * uvpitch, uv + (size_t)y * s2, uvrow);
        }
    }
    ovl_update_mask(w, f);
    ovl_paint_mask(w, f, pix, pitch);
    SDL_UnlockTexture(w->frame_tex);
    return 0;
}

/* ---- help ------------------------------------------------------------------------------ */

static void help(ovl_window *w)
{
    if (!w->help)
        return;
    float fp = (float)w->font_px;
    int n = (int)(sizeof key_help / sizeof key_help[0]);
    /* the first layout that fits: one column, two, then smaller type */
    TTF_Font *font = w->font;
    int lh = 0, cols = 1, rows = n, kw = 0, dw = 0;
    float colw = 0, pw = 0, ph = 0;
    for (int t = 0; t < 4; t++) {
        font = t < 2 ? w->font : w->font_small;
        cols = 1 + (t & 1);
        rows = (n + cols - 1) / cols;
        lh = TTF_FontLineSkip(font);
        kw = dw = 0;
        for (int i = 0; i < n; i++) {
            int a, b;
            ovl_text_size(w, font, key_help[i].keys, &a, &b);
            if (a > kw)
                kw = a;
            ovl_text_size(w, font, key_help[i].what, &a, &b);
            if (a > dw)
                dw = a;
        }
        colw = (float)(kw + dw) + fp * 2.0f;
        pw = colw * (float)cols + fp;
        ph = (float)(lh * (rows + 2)) + fp;
        if (pw <= (float)w->ww && ph <= (float)w->wh)
            break;
    }
    float x = ((float)w->ww - pw) / 2, y = ((float)w->wh - ph) / 2;
    if (y < 0)
        y = 0;
    if (x < 0)
        x = 0;
    ovl_fill(w, 0, 0, (float)w->ww, (float)w->wh, (SDL_Color){0, 0, 0, 110});
    ovl_panel_rect(w, x, y, pw, ph);
    ovl_panel_rect(w, x, y, pw, ph); /* twice: the help must read over anything */
    ovl_text(w, font, "Keys", x + fp, y + fp * 0.5f, 0, ovl_accent);
    for (int i = 0; i < n; i++) {
        int c = i / rows, k = i % rows;
        float cx = x + (float)c * colw;
        float yy = y + fp * 0.5f + (float)(lh * (k + 1)) + fp * 0.4f;
        ovl_text(w, font, key_help[i].keys, cx + fp + (float)kw, yy, 2, ovl_ink);
        ovl_text(w, font, key_help[i].what, cx + fp * 2.0f + (float)kw, yy, 0, ovl_dimtext);
    }
}

/* ---- draw and render ---------------------------------------------------------------------- */

int ovl_draw(ovl_window *w, const cap_frame *f, const coach_result *r, const ovl_status *st)
{
    if (!w)
        return -EINVAL;
    w->draws++;
    update_size(w);
    if (ovl_fonts_open(w, NULL, 0))
        return -ENOENT;
    if (f) {
        /* the frame's place first: the marks are sampled at display size */
        w->fr = ovl_fit_rect(f->view.w, f->view.h, w->ww, w->wh);
        int rc = upload(w, &f->view);
        if (rc)
            return rc;
        w->frames++;
    }
    if (r) {
        if (f) {
            ovl_spark_push(w, r->t, r->score);
            if (r->ready && !w->prev_ready)
                tone_play(w);
            w->prev_ready = r->ready;
        }
        if (r != &w->last)
            w->last = *r;
        w->have_result = 1;
    } else if (w->have_result) {
        r = &w->last;
    }
    w->fr = ovl_fit_rect(w->fw, w->fh, w->ww, w->wh);
    if (f)
        ovl_update_hist_rgb(w, &f->view);
    coach_result stale;
    if (st && st->source_lost && r && r->ready) {
        /* the last result is not a ready frame any more: no cue over it */
        stale = *r;
        stale.ready = 0;
        r = &stale;
    }

    SDL_SetRenderDrawColor(w->ren, 8, 9, 12, 255);
    SDL_RenderClear(w->ren);
    if (w->frame_tex && w->fw > 0) {
        if (w->mirror)
            SDL_RenderCopyExF(w->ren, w->frame_tex, NULL, &w->fr, 0, NULL, SDL_FLIP_HORIZONTAL);
        else
            SDL_RenderCopyF(w->ren, w->frame_tex, NULL, &w->fr);
        ovl_draw_guides(w, r);
        ovl_draw_subject(w, r);
    }
    ovl_draw_hud(w, r, st);
    help(w);
    return 0;
}

SDL_Surface *ovl_readback(ovl_window *w)
{
    SDL_Surface *s = SDL_CreateRGBSurfaceWithFormat(0, w->ww, w->wh, 32, SDL_PIXELFORMAT_ARGB8888);
    if (!s)
        return NULL;
    if (SDL_RenderReadPixels(w->ren, NULL, SDL_PIXELFORMAT_ARGB8888, s->pixels, s->pitch) != 0) {
        SDL_FreeSurface(s);
        return NULL;
    }
    return s;
}

/* Saves the back buffer (before present) as PNG: temp name, then rename. */
static void screenshot(ovl_window *w)
{
    SDL_Surface *s = ovl_readback(w);
    char tmp[1100];
    snprintf(tmp, sizeof tmp, "%s.tmp-%d", w->shot_path, (int)getpid());
    if (!s || IMG_SavePNG(s, tmp) != 0 || rename(tmp, w->shot_path) != 0) {
        fprintf(stderr, "vfcoach: screenshot '%s': %s\n", w->shot_path, s ? SDL_GetError() : "cannot read the window");
        unlink(tmp);
    }
    SDL_FreeSurface(s);
    w->shot_done = 1;
    SDL_Event e;
    SDL_zero(e);
    e.type = SDL_QUIT;
    SDL_PushEvent(&e);
}

int ovl_render(ovl_window *w, const cap_frame *f, const coach_result *r, const ovl_status *st)
{
    Uint64 t0 = SDL_GetPerformanceCounter();
    struct timespec c0, c1;
    clock_gettime(CLOCK_THREAD_CPUTIME_ID, &c0);
    int rc = ovl_draw(w, f, r, st);
    if (rc)
        return rc;
    if (w->shot_path[0] && !w->shot_done && (long)w->frames >= w->shot_after)
        screenshot(w);
    SDL_RenderPresent(w->ren);
    double ms = (double)(SDL_GetPerformanceCounter() - t0) * 1000.0 / (double)SDL_GetPerformanceFrequency();
    /* shown with the stats: what the window itself costs per frame */
    w->render_ms = w->render_ms > 0 ? 0.9 * w->render_ms + 0.1 * ms : ms;
    /* the same in this thread's CPU time: tells a busy machine from a slow window */
    clock_gettime(CLOCK_THREAD_CPUTIME_ID, &c1);
    double cpu = (double)(c1.tv_sec - c0.tv_sec) * 1e3 + (double)(c1.tv_nsec - c0.tv_nsec) * 1e-6;
    w->render_cpu_ms = w->render_cpu_ms > 0 ? 0.9 * w->render_cpu_ms + 0.1 * cpu : cpu;
    if (f) {
        w->sum_ms += ms;
        w->sum_cpu_ms += cpu;
    }
    return 0;
}

/* ---- keys ---------------------------------------------------------------------------------- */

/* Presenter mode shows one guide: turning one on turns the others off. */
static void toggle_guide(ovl_window *w, int g)
{
    int on = !w->guide[g];
    if (w->presenter) {
        for (int i = 0; i < OVL_G_COUNT; i++)
            if (i != OVL_G_HORIZON || g == OVL_G_HORIZON)
                w->guide[i] = 0;
        w->present_guide = on ? g : -1;
    }
    w->guide[g] = on;
}

static void next_guide(ovl_window *w)
{
    int cur = w->present_guide;
    if (cur < 0)
        for (int i = 0; i < OVL_G_COUNT; i++)
            if (w->guide[i])
                cur = i;
    int g = (cur + 1) % OVL_G_COUNT;
    int was_presenter = w->presenter;
    w->presenter = 1; /* Tab always means "one at a time" */
    memset(w->guide, 0, sizeof w->guide);
    w->guide[g] = 1;
    w->present_guide = g;
    if (g == OVL_G_CROP && w->crop == 0)
        w->crop = 1;
    w->presenter = was_presenter;
}

ovl_action ovl_handle_event(ovl_window *w, const SDL_Event *e)
{
    if (!w || !e)
        return OVL_ACT_NONE;
    if (e->type == SDL_QUIT)
        return OVL_ACT_QUIT;
    if (e->type == SDL_WINDOWEVENT) {
        if (e->window.event == SDL_WINDOWEVENT_CLOSE)
            return OVL_ACT_QUIT;
        if (e->window.event == SDL_WINDOWEVENT_SIZE_CHANGED)
            update_size(w);
        return OVL_ACT_NONE;
    }
    if (e->type != SDL_KEYDOWN || e->key.repeat)
        return OVL_ACT_NONE;
    SDL_Keycode k = e->key.keysym.sym;
    switch (k) {
    case SDLK_ESCAPE:
        if (w->help) {
            w->help = 0;
            return OVL_ACT_NONE;
        }
        return OVL_ACT_QUIT;
    case SDLK_q: return OVL_ACT_QUIT;
    case SDLK_h:
    case SDLK_F1:
    case SDLK_QUESTION: w->help = !w->help; break;
    case SDLK_1: toggle_guide(w, OVL_G_THIRDS); break;
    case SDLK_2: toggle_guide(w, OVL_G_PHI); break;
    case SDLK_3: toggle_guide(w, OVL_G_DIAGONALS); break;
    case SDLK_4:
        if (!w->guide[OVL_G_SPIRAL]) {
            w->spiral_orient = 0;
            toggle_guide(w, OVL_G_SPIRAL);
        } else if (w->spiral_orient < 3) {
            w->spiral_orient++;
        } else {
            toggle_guide(w, OVL_G_SPIRAL);
        }
        break;
    case SDLK_5: toggle_guide(w, OVL_G_CENTRE); break;
    case SDLK_6: toggle_guide(w, OVL_G_HORIZON); break;
    case SDLK_7:
        w->crop = (w->crop + 1) % OVL_CROP_COUNT;
        if ((w->crop != 0) != (w->guide[OVL_G_CROP] != 0))
            toggle_guide(w, OVL_G_CROP);
        if (!w->crop)
            w->guide[OVL_G_CROP] = 0;
        break;
    case SDLK_0:
        memset(w->guide, 0, sizeof w->guide);
        w->present_guide = -1;
        break;
    case SDLK_TAB: next_guide(w); break;
    case SDLK_l: w->hist_mode = (w->hist_mode + 1) % 3; break;
    case SDLK_z: w->zebras = !w->zebras; break;
    case SDLK_f: w->peaking = !w->peaking; break;
    case SDLK_k: w->peak_colour = (w->peak_colour + 1) % OVL_PEAK_COLOURS; break;
    case SDLK_b: w->subject = !w->subject; break;
    case SDLK_w: w->hints = !w->hints; break;
    case SDLK_e: w->explain = !w->explain; break;
    case SDLK_i: w->stats = !w->stats; break;
    case SDLK_m: w->mirror = !w->mirror; break;
    case SDLK_t:
        if (!w->tone && tone_open(w)) {
            ovl_notice(w, "No audio device: the ready tone stays off.");
            break;
        }
        w->tone = !w->tone;
        ovl_notice(w, w->tone ? "Ready tone on." : "Ready tone off.");
        break;
    case SDLK_F11: {
        Uint32 fl = SDL_GetWindowFlags(w->win);
        SDL_SetWindowFullscreen(w->win, (fl & SDL_WINDOW_FULLSCREEN_DESKTOP) ? 0 : SDL_WINDOW_FULLSCREEN_DESKTOP);
        break;
    }
    case SDLK_SPACE:
    case SDLK_s: return OVL_ACT_SNAPSHOT;
    case SDLK_p: return OVL_ACT_NEXT_PROFILE;
    default: break;
    }
    return OVL_ACT_NONE;
}
