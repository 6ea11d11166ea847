/* Internals shared between the files of overlay/: the window struct, the
 * palette, the drawing primitives, the text cache and the pure geometry the
 * pixel tests check.  Main thread only, like everything in overlay/. */
#ifndef VFCOACH_OVERLAY_INTERNAL_H
#define VFCOACH_OVERLAY_INTERNAL_H

#include <stdint.h>

#include <SDL.h>
#include <SDL_ttf.h>

#include "overlay/overlay.h"

/* ---- guides ------------------------------------------------------------ */

typedef enum ovl_guide {
    OVL_G_THIRDS = 0,
    OVL_G_PHI,
    OVL_G_DIAGONALS,
    OVL_G_SPIRAL,
    OVL_G_CENTRE,
    OVL_G_HORIZON,
    OVL_G_CROP,
    OVL_G_COUNT
} ovl_guide;

/* Crop masks, width:height.  Index 0 is unused (no mask). */
#define OVL_CROP_COUNT 5
extern const double ovl_crop_ratio[OVL_CROP_COUNT];
extern const char *const ovl_crop_name[OVL_CROP_COUNT];

/* Guide names as shown on screen and accepted by ovl_opts.show. */
extern const char *const ovl_guide_name[OVL_G_COUNT];

/* Phi grid fractions, 1/phi^2 and 1/phi. */
#define OVL_PHI 1.6180339887498949
#define OVL_PHI_A 0.3819660112501051
#define OVL_PHI_B 0.6180339887498949

/* Within this roll (degrees) the artificial horizon takes its level look. */
#define OVL_LEVEL_DEG 0.5

/* ---- palette: our own, chosen for luminance contrast first ------------- */

extern const SDL_Color ovl_ink;      /* guide cores, text                   */
extern const SDL_Color ovl_casing;   /* dark edge under every guide line    */
extern const SDL_Color ovl_panel;    /* translucent panel behind text       */
extern const SDL_Color ovl_dimtext;  /* secondary text                      */
extern const SDL_Color ovl_accent;   /* ready cue (amber, bright)           */
extern const SDL_Color ovl_level;    /* horizon when level (sky blue)       */
extern const SDL_Color ovl_zebra;    /* zebra stripes (deep violet)         */
#define OVL_PEAK_COLOURS 3
extern const SDL_Color ovl_peak[OVL_PEAK_COLOURS];

/* ---- text cache ----------------------------------------------------------- */

#define OVL_TEXT_SLOTS 192
#define OVL_TEXT_MAX 200

typedef struct ovl_text {
    char s[OVL_TEXT_MAX];
    TTF_Font *font;
    SDL_Color c;
    SDL_Texture *tex;
    int w, h;
    uint64_t used;        /* frame counter when last drawn: LRU eviction */
} ovl_text_slot;

/* ---- strokes: anti-aliased lines we rasterise ourselves ------------------
 * SDL's software renderer snaps geometry to whole pixels, so thin
 * anti-aliased lines are computed here (coverage from the distance to the
 * segment) into a window-sized layer, and only the 32x32 tiles they touch
 * are uploaded and blended. */

#define OVL_SEGS 4096
#define OVL_TILE 32

typedef struct ovl_seg {
    float x0, y0, x1, y1, r;   /* ends and half width, window pixels */
    SDL_Color c;
} ovl_seg;

typedef struct ovl_layer {
    uint32_t *px;              /* w*h ARGB, straight alpha, 0 = clear     */
    int w, h;
    SDL_Texture *tex;
    uint8_t *tile;             /* tiles touched since the last flush      */
    int tx, ty;                /* tiles across and down                   */
    ovl_seg casing[OVL_SEGS], core[OVL_SEGS]; /* dark edges first, then cores */
    int ncasing, ncore;
} ovl_layer;

/* What the static guide layer was drawn for (compared bytewise). */
typedef struct ovl_static_key {
    int ww, wh, mirror, diag, spiral, orient, centre, px;
    float fx, fy, fw, fh;
} ovl_static_key;

/* ---- the window ---------------------------------------------------------- */

#define OVL_SPARK_N 2048     /* score samples kept (10 s at up to 200 fps) */
#define OVL_SPARK_SECONDS 10.0
#define OVL_MASK_MAX_PX (640 * 400) /* zebra/peaking mask budget, pixels */

struct ovl_window {
    SDL_Window *win;
    SDL_Renderer *ren;
    int ww, wh;                /* renderer output size, pixels            */
    int software;              /* the renderer is SDL's software one      */
    char renderer_name[32];

    /* the frame */
    SDL_Texture *frame_tex;
    Uint32 frame_fmt;
    int fw, fh;                /* frame size, pixels (0: none yet)        */
    SDL_FRect fr;              /* where the frame is drawn                */

    /* zebra / peaking marks, painted into the frame texture */
    int mw, mh;                /* mask size, samples                      */
    uint32_t *mask;            /* mw*mh colours, 0 = no mark              */
    size_t mask_cap;           /* pixels                                  */
    int *mask_sx;              /* source column of each mask column       */
    size_t mask_sx_cap;
    int mask_valid;
    int peak_threshold;        /* 8-bit luma central difference           */

    /* what is shown */
    int guide[OVL_G_COUNT];
    int spiral_orient;         /* 0..3                                    */
    int crop;                  /* index into ovl_crop_ratio, 0 none        */
    int hist_mode;             /* 0 off, 1 luma, 2 RGB                    */
    int zebras, peaking, peak_colour, subject, meter, hints, label, explain, help, stats;
    int mirror, tone, presenter;
    int present_guide;         /* presenter: the one guide shown           */
    coach_grid grid;           /* power points for the subject arrow       */

    /* type */
    char font_path[1024];
    TTF_Font *font, *font_big, *font_small;
    int font_px;               /* size font was opened at, 0 none          */
    ovl_text_slot text[OVL_TEXT_SLOTS];

    ovl_layer layer;           /* anti-aliased strokes                     */
    ovl_layer stat;            /* static guides (diagonals, spiral, centre), kept */
    ovl_static_key stat_key;   /* what stat holds                           */
    int stat_valid;
    ovl_layer *target;         /* where strokes go: NULL = layer            */

    /* score history for the sparkline */
    double spark_t[OVL_SPARK_N];
    float spark_s[OVL_SPARK_N];
    int spark_head, spark_n;

    uint32_t hist_rgb[3][256]; /* RGB histogram, subsampled                 */
    uint64_t hist_rgb_total;

    coach_result last;         /* result of the last frame (redraws)       */
    coach_result explain_res;  /* what the explain panel shows (4 Hz)      */
    int explain_have;
    int have_result;
    int prev_ready;
    double ready_enter;        /* score at which ready is entered          */

    SDL_AudioDeviceID audio;
    int16_t *tone_buf;
    Uint32 tone_bytes;

    char notice[256];
    Uint64 notice_until;       /* SDL ticks, ms                            */

    char shot_path[1024];
    long shot_after;
    int shot_done;
    uint64_t frames;           /* frames shown (f != NULL)                 */
    uint64_t draws;            /* every ovl_draw                           */
    double render_ms;          /* smoothed cost of ovl_render incl. present */
    double render_cpu_ms;      /* the same in thread CPU time              */
    double sum_ms, sum_cpu_ms; /* totals over frames shown (summary line)  */
};

/* ---- window.c ------------------------------------------------------------- */

/* Draws everything into the back buffer without presenting (tests read
 * pixels after this). */
int ovl_draw(ovl_window *w, const cap_frame *f, const coach_result *r, const ovl_status *st);
/* Sets what is shown from a comma list (see ovl_opts.show); 0 or -EINVAL
 * with a line in err naming the unknown item. */
int ovl_show_parse(ovl_window *w, const char *list, char *err, size_t errlen);
/* Reads the back buffer into a new ARGB8888 surface (caller frees). */
SDL_Surface *ovl_readback(ovl_window *w);

/* ---- draw.c ---------------------------------------------------------------- */

/* The largest rect of the frame's aspect centred in a ww x wh window. */
SDL_FRect ovl_fit_rect(int fw, int fh, int ww, int wh);
/* The largest rect of aspect ratio (w/h) centred in r. */
SDL_FRect ovl_crop_rect(const SDL_FRect *r, double ratio);
/* Frame fractions (u across, v down) to window pixels, honouring mirror. */
void ovl_map(const ovl_window *w, double u, double v, float *x, float *y);

void ovl_fill(ovl_window *w, float x, float y, float rw, float rh, SDL_Color c);
/* A crisp axis-aligned guide line: a dark casing and a light core
 * (pass 1: casing only, 2: core only, 0: both). */
void ovl_hline(ovl_window *w, float x0, float x1, float y, int thick, int pass);
void ovl_vline(ovl_window *w, float x, float y0, float y1, int thick, int pass);
/* A guide stroke: a dark casing 2 px wider under a core of colour c. */
void ovl_stroke(ovl_window *w, float x0, float y0, float x1, float y1, float width);
void ovl_stroke_col(ovl_window *w, float x0, float y0, float x1, float y1, float width, SDL_Color c);
/* A stroke without casing. */
void ovl_stroke_plain(ovl_window *w, float x0, float y0, float x1, float y1, float width, SDL_Color c);
/* Draws the strokes recorded so far (keeps drawing order with fills and text). */
void ovl_strokes_flush(ovl_window *w);
void ovl_layer_free(ovl_layer *l);
/* Static strokes: 1 when the layer must be redrawn for key (strokes until
 * ovl_static_end go into it), 0 when it still holds them, -1 on failure;
 * ovl_static_end(w, that value) blends it. */
int ovl_static_begin(ovl_window *w, const ovl_static_key *key);
void ovl_static_end(ovl_window *w, int built);
/* Outline of a rectangle with anti-aliased strokes. */
void ovl_frame_rect(ovl_window *w, float x, float y, float rw, float rh, float width, SDL_Color c);

/* ---- text.c ----------------------------------------------------------------- */

int ovl_fonts_open(ovl_window *w, char *err, size_t errlen);
void ovl_fonts_close(ovl_window *w);
void ovl_text_flush(ovl_window *w);
/* Size of s in font; 0 on success. */
int ovl_text_size(ovl_window *w, TTF_Font *font, const char *s, int *tw, int *th);
/* Draws s with its top-left at (x, y) (align: 0 left, 1 centre, 2 right
 * of x); returns the width drawn. */
int ovl_text(ovl_window *w, TTF_Font *font, const char *s, float x, float y, int align, SDL_Color c);
/* A panel: rounded-looking translucent rectangle. */
void ovl_panel_rect(ovl_window *w, float x, float y, float rw, float rh);

/* ---- guides.c --------------------------------------------------------------- */

void ovl_draw_guides(ovl_window *w, const coach_result *r);
/* The horizon line's endpoints in window pixels for a roll (tests). */
void ovl_horizon_line(const ovl_window *w, double tilt_deg, double v, float *x0, float *y0,
                      float *x1, float *y1);

/* ---- readouts.c ------------------------------------------------------------- */

/* Recomputes the zebra/peaking mask and the RGB histogram from a new frame. */
void ovl_update_mask(ovl_window *w, const coach_frame *f);
/* Paints the marks into a locked frame texture of f's layout. */
void ovl_paint_mask(ovl_window *w, const coach_frame *f, void *pixels, int pitch);
void ovl_update_hist_rgb(ovl_window *w, const coach_frame *f);
void ovl_draw_subject(ovl_window *w, const coach_result *r);
void ovl_draw_hud(ovl_window *w, const coach_result *r, const ovl_status *st);
void ovl_spark_push(ovl_window *w, double t, double score);
/* Swaps the words left/right (whole words, either case of the first
 * letter) for a mirrored view. */
void ovl_mirror_words(const char *in, char *out, size_t n);
/* 8-bit luma (BT.709 weights on the encoded values; Y' for Y'CbCr, range
 * expanded) of one pixel. */
int ovl_luma_at(const coach_frame *f, int x, int y);

#endif
