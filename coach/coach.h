/* coach — measurements, score and hints for one viewfinder frame.
 *
 * Pure computation: no SDL, no V4L2, no I/O.  Every function here works on a
 * caller-owned frame view and writes into caller-owned result structs.
 *
 * Threads: a coach_analyzer is used by one thread at a time (the UI thread in
 * the program); separate analyzers are independent.
 *
 * Allocation: coach_create() allocates every buffer the analysis needs for
 * frames up to the configured size; coach_analyze() never allocates, except
 * once when a frame is larger than any seen before (a format change).
 */
#ifndef VFCOACH_COACH_H
#define VFCOACH_COACH_H

#include <stddef.h>
#include <stdint.h>

/* Frame sides coach_analyze() accepts, pixels. */
#define COACH_MIN_DIM 8         /* frames smaller than this are refused       */
#define COACH_MAX_DIM 16384     /* keeps every fixed-width accumulator exact  */

/* Pixel layouts a frame view may carry, named by their byte order in memory. */
typedef enum coach_format {
    COACH_FMT_NONE = 0,
    COACH_FMT_RGB24,    /* R,G,B                                            */
    COACH_FMT_BGR24,    /* B,G,R                                            */
    COACH_FMT_XRGB8888, /* B,G,R,X: a little-endian 0xXXRRGGBB word (SDL's)  */
    COACH_FMT_YUYV,     /* Y0,U,Y1,V (4:2:2)                                */
    COACH_FMT_NV12,     /* Y plane, then a CbCr plane at h/2 rows            */
    COACH_FMT_GREY,     /* Y only                                           */
} coach_format;

/* How Y'CbCr frames were encoded (the driver says; defaults below). */
typedef enum coach_matrix { COACH_MATRIX_BT601 = 0, COACH_MATRIX_BT709 } coach_matrix;
typedef enum coach_range { COACH_RANGE_LIMITED = 0, COACH_RANGE_FULL } coach_range;

/* A view of one frame.  Not owned: the memory belongs to whoever filled it
 * and must stay valid for the duration of the call that receives the view. */
typedef struct coach_frame {
    const uint8_t *data;   /* first plane                                    */
    const uint8_t *data2;  /* NV12 CbCr plane; NULL means data + stride * h  */
    int w, h;              /* pixels                                         */
    int stride;            /* bytes per row of the first plane               */
    int stride2;           /* bytes per row of the CbCr plane (0: = stride)  */
    coach_format format;
    coach_matrix matrix;   /* Y'CbCr formats only                            */
    coach_range range;     /* Y'CbCr formats only                            */
} coach_frame;

/* Bytes per pixel of the first plane (YUYV: 2; NV12, GREY: 1); 0 if unknown. */
int coach_format_bpp(coach_format f);
/* Short lower-case name ("rgb24", "yuyv", ...). Static string. */
const char *coach_format_name(coach_format f);

/* ---- scoring profiles and grids -------------------------------------- */

typedef enum coach_profile {
    COACH_PROFILE_LANDSCAPE = 0,
    COACH_PROFILE_PORTRAIT,
    COACH_PROFILE_PRODUCT,
    COACH_PROFILE_COUNT
} coach_profile;

/* Parse "landscape"/"portrait"/"product"; returns -EINVAL when unknown. */
int coach_profile_parse(const char *name, coach_profile *out);
const char *coach_profile_name(coach_profile p);

typedef enum coach_grid { COACH_GRID_THIRDS = 0, COACH_GRID_PHI } coach_grid;

typedef struct coach_config {
    coach_profile profile;
    coach_grid grid;          /* power points used for subject placement   */
    double smooth_tau_s;      /* score smoothing time constant, seconds    */
    double ready_enter;       /* score (0..100) to enter the ready state   */
    double ready_leave;       /* score (0..100) below which ready is left  */
    double ready_dwell_s;     /* seconds above ready_enter before ready    */
    int max_w, max_h;         /* largest frame to preallocate for (pixels) */
} coach_config;

/* Fills *cfg with the defaults (landscape, thirds, tau 0.5 s, ...). */
void coach_config_default(coach_config *cfg);

/* ---- results ----------------------------------------------------------- */

#define COACH_MAX_TERMS 16
#define COACH_MAX_HINTS 3
#define COACH_HINT_LEN 96

typedef enum coach_level_source {
    COACH_LEVEL_NONE = 0,
    COACH_LEVEL_HORIZON,
    COACH_LEVEL_VERTICALS
} coach_level_source;

/* Border sides, a bit each, for edge intrusions. */
enum { COACH_EDGE_LEFT = 1, COACH_EDGE_RIGHT = 2, COACH_EDGE_TOP = 4, COACH_EDGE_BOTTOM = 8 };

/* One interpretable score term: value 0..1, weight >= 0, contribution =
 * 100 * weight * value / sum of weights of the applicable terms. */
typedef struct coach_term {
    const char *name;        /* static, stable: used as a JSON key */
    const char *label;       /* static, plain words for the explain panel */
    double value, weight, contribution;
} coach_term;

typedef struct coach_box { double x, y, w, h; } coach_box; /* fractions 0..1: centre x,y; size w,h */

typedef struct coach_result {
    int width, height;              /* pixels of the analysed frame            */
    double t;                       /* seconds, the time passed to analyze     */

    /* exposure and tone (issue: vertical slice) */
    double mean_luma;               /* linear relative luminance 0..1          */
    double exposure_ev;             /* log2(mean / 0.18), stops                */
    double clip_high;               /* fraction of pixels with luma >= 250     */
    double clip_low;                /* fraction of pixels with luma <= 5       */
    uint32_t hist[256];             /* 8-bit luma histogram of a fixed quarter
                                       of the pixels (every row; see tone.c)   */
    uint32_t hist_total;            /* pixels counted in hist                  */
    double colourfulness;           /* Hasler & Süsstrunk M, 8-bit sRGB units  */
    double sharpness;               /* variance of the 3x3 Laplacian of luma   */
    double sharpness_ref;           /* the best sharpness this scene showed
                                       recently (decaying maximum, ~6 s), the
                                       reference of the live sharpness judgement;
                                       = sharpness on a first frame or a still */

    /* composition */
    int has_tilt;                   /* 0: no usable lines; fields below unset */
    double tilt_deg;                /* horizon angle, + when its right end is higher */
    coach_level_source level_source;
    double tilt_confidence;         /* 0..1 */
    int has_horizon;
    double horizon_y;               /* fraction of height from the top at x = w/2 */
    int has_subject;
    coach_box subject;
    double placement;               /* subject centre to nearest power point, fraction of diagonal */
    int placement_point;            /* 0 upper-left, 1 upper-right, 2 lower-left, 3 lower-right */
    double balance_lr;              /* -1 all weight left .. +1 all right */
    double balance_tb;              /* -1 all weight top .. +1 all bottom */
    unsigned edge_intrusions;       /* COACH_EDGE_* bits */
    int has_lead_room;
    double lead_room;               /* space ahead / (ahead + behind), 0..1; 0.5 = centred */
    double motion_px_s;             /* global frame shift, full-res pixels per second */
    int has_motion;                 /* 0: shift not measurable (first frame, too little
                                       texture outside the subject); motion_px_s is 0 then */
    int has_subject_focus;
    double subject_focus;           /* sharpness in subject box / whole frame */

    /* score */
    double score_raw;               /* 0..100 this frame */
    double score;                   /* 0..100 smoothed */
    int ready;                      /* 1 while in the ready state */
    int nterms;
    coach_term terms[COACH_MAX_TERMS];
    int nhints;
    char hints[COACH_MAX_HINTS][COACH_HINT_LEN]; /* worst first, NUL-terminated */
} coach_result;

/* Plain word for a colourfulness M, by the categories of Hasler &
 * Suesstrunk 2003 (Table 2: 0 not, 15 slightly, 33 moderately, 45 averagely,
 * 59 quite, 82 highly, 109 extremely colourful).  Static string. */
const char *coach_colourfulness_word(double m);

/* ---- the analyzer ------------------------------------------------------ */

typedef struct coach_analyzer coach_analyzer;

/* Creates an analyzer; NULL on allocation failure or a bad config. */
coach_analyzer *coach_create(const coach_config *cfg);
/* Destroys; NULL is accepted. */
void coach_destroy(coach_analyzer *a);

/* Analyses one frame taken at time t (seconds, monotonic).  Frames with a
 * smaller t than the previous reset the temporal state (smoothing, motion).
 * Returns 0, or -EINVAL for a bad view. */
int coach_analyze(coach_analyzer *a, const coach_frame *f, double t, coach_result *out);

/* Forgets temporal state (smoothing, ready, motion), e.g. after a source change. */
void coach_reset(coach_analyzer *a);

/* Switches the scoring profile (weights, which terms apply, targets) from
 * the next coach_analyze() on; temporal state (smoothing, ready, motion,
 * the sharpness reference) is kept, so the meter glides to the new score
 * instead of jumping.  An unknown profile is ignored. */
void coach_set_profile(coach_analyzer *a, coach_profile p);

/* Writes the result as one JSON object (no newline) into buf.  `file` is
 * added as "file" when not NULL.  Returns the length it needed (like
 * snprintf): a return >= n means the output was truncated. */
int coach_json(const coach_result *r, const char *file, char *buf, size_t n);

#endif
