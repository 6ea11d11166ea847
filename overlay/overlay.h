/* overlay — the SDL2 viewfinder window: the live frame, guides, readouts,
 * hints, the score meter and the ready cue; and key handling.
 *
 * Threads: every function here is called on the main thread only (SDL's
 * rule).  The capture thread never touches this module.
 *
 * Ownership: ovl_window owns its SDL window, renderer, textures and font;
 * frames and results passed to ovl_render() are borrowed for the call.
 */
#ifndef VFCOACH_OVERLAY_H
#define VFCOACH_OVERLAY_H

#include <stddef.h>
#include <stdint.h>

#include <SDL.h>

#include "capture/capture.h"
#include "coach/coach.h"

typedef struct ovl_opts {
    int width, height;       /* initial window size, pixels (0: 1280x720)  */
    int presenter;           /* fullscreen, large type, one guide at a time */
    int display;             /* display index for presenter mode            */
    int mirror;              /* start mirrored                              */
    int tone;                /* ready tone on (SDL audio)                   */
    const char *font_path;   /* NULL: find a sans font through fontconfig   */
    const char *title;       /* window title                                */
    /* added by the window work: */
    int stats;               /* show fps / drops / latency from the start   */
    int grid;                /* coach_grid: power points for the subject arrow */
    int hidden;              /* create the window hidden (tests)            */
    const char *show;        /* NULL: default set; else a comma list of what
                              * is shown at start: thirds, phi, diagonals,
                              * spiral[:0-3], centre, horizon, crop:1:1|4:5|3:2|16:9,
                              * histogram, histogram-rgb, zebras, peaking,
                              * subject, meter, hints, label, explain, help,
                              * stats, or none */
    const char *screenshot;  /* save the window as PNG here after
                              * screenshot_after frames, then push SDL_QUIT */
    long screenshot_after;   /* frames (0: 30)                              */
} ovl_opts;

/* Everything the window shows besides the frame and the analysis. */
typedef struct ovl_status {
    const char *source_name; /* e.g. "demo: harbour at dusk"               */
    const char *message;     /* a state line ("Camera unplugged ...") or NULL */
    int source_lost;         /* 1: show the last frame dimmed              */
    double fps_shown;        /* frames shown per second                    */
    uint64_t dropped;        /* frames dropped by the mailbox              */
    double latency_ms;       /* capture timestamp to present, ms           */
    coach_profile profile;
} ovl_status;

/* What a key or other input asks the program to do. */
typedef enum ovl_action {
    OVL_ACT_NONE = 0,
    OVL_ACT_QUIT,
    OVL_ACT_SNAPSHOT,
    OVL_ACT_NEXT_PROFILE,
} ovl_action;

typedef struct ovl_window ovl_window;

/* Creates the window (SDL video must be initialised by the caller).  NULL on
 * failure with one line in err naming the cause (no display, no font...). */
ovl_window *ovl_create(const ovl_opts *o, char *err, size_t errlen);
void ovl_destroy(ovl_window *w);

/* Draws the frame with the analysis and presents.  f may be NULL to redraw
 * the last frame (e.g. after a resize or while the source is lost). */
int ovl_render(ovl_window *w, const cap_frame *f, const coach_result *r, const ovl_status *st);

/* Handles one SDL event (keys, resize, ...); returns what the program should do. */
ovl_action ovl_handle_event(ovl_window *w, const SDL_Event *e);

/* Finds a sans-serif TrueType font through fontconfig; 0 and the path in
 * buf, or -ENOENT with a line in err. */
int ovl_font_find(char *buf, size_t n, char *err, size_t errlen);

/* Shows a short line for a few seconds (e.g. "Saved ..."), copied. */
void ovl_notice(ovl_window *w, const char *text);

/* Is the window mirrored now (the M key)?  Snapshots never are. */
int ovl_mirrored(const ovl_window *w);

#endif
