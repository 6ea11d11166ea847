/* Internals shared between the files of the coach library. */
#ifndef VFCOACH_COACH_INTERNAL_H
#define VFCOACH_COACH_INTERNAL_H

#include "coach/coach.h"

/* The downscaled analysis image the tone pass builds from the full frame.
 * Each analysis pixel is the box mean of a scale x scale block of the full
 * frame, scale = max(1, w / 320) (so aw is 320..639 for w >= 320).  All
 * planes are aw*ah floats, row-major, no padding, owned by the analyzer and
 * valid until the next coach_analyze(). */
typedef struct coach_aimg {
    int w, h;            /* analysis size in pixels                          */
    int scale;           /* full-resolution pixels per analysis pixel (box)  */
    const float *luma;   /* 8-bit gamma-encoded luma units 0..255 (BT.709)   */
    const float *r, *g, *b; /* 8-bit sRGB units 0..255                      */
    const float *lap_sq; /* mean of L^2 over the block, L = full-res 3x3 Laplacian of 8-bit luma (0 on the frame's 1-px border) */
    const float *lap;    /* mean of L over the block                         */
} coach_aimg;

/* Composition state (level, horizon, subject, balance, lead room,
 * steadiness, subject focus): compose.c and the files it uses. */
typedef struct coach_compose coach_compose;

/* Preallocates for analysis images up to max_aw x max_ah. NULL on failure. */
coach_compose *coach_compose_create(int max_aw, int max_ah);
void coach_compose_destroy(coach_compose *c);
void coach_compose_reset(coach_compose *c);
/* Fills the composition fields of *out (has_tilt ... subject_focus) from the
 * analysis image; t in seconds for motion; full_w/full_h for pixel units.
 * Must not allocate. */
void coach_compose_run(coach_compose *c, const coach_aimg *img, int full_w, int full_h,
                       double t, const coach_config *cfg, coach_result *out);

#endif
