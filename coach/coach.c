/* The analyzer: configuration, format and profile names, and the per-frame
 * driver that runs the tone pass, the composition analysis and the score. */
#include <errno.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "coach/coach_internal.h"

int coach_format_bpp(coach_format f)
{
    switch (f) {
    case COACH_FMT_RGB24:
    case COACH_FMT_BGR24: return 3;
    case COACH_FMT_XRGB8888: return 4;
    case COACH_FMT_YUYV: return 2;
    case COACH_FMT_NV12:
    case COACH_FMT_GREY: return 1;
    default: return 0;
    }
}

const char *coach_format_name(coach_format f)
{
    switch (f) {
    case COACH_FMT_RGB24: return "rgb24";
    case COACH_FMT_BGR24: return "bgr24";
    case COACH_FMT_XRGB8888: return "xrgb8888";
    case COACH_FMT_YUYV: return "yuyv";
    case COACH_FMT_NV12: return "nv12";
    case COACH_FMT_GREY: return "grey";
    default: return "none";
    }
}

static const char *const profile_names[COACH_PROFILE_COUNT] = {
    [COACH_PROFILE_LANDSCAPE] = "landscape",
    [COACH_PROFILE_PORTRAIT] = "portrait",
    [COACH_PROFILE_PRODUCT] = "product",
};

int coach_profile_parse(const char *name, coach_profile *out)
{
    if (!name)
        return -EINVAL;
    for (int i = 0; i < COACH_PROFILE_COUNT; i++)
        if (strcmp(name, profile_names[i]) == 0) {
            if (out)
                *out = (coach_profile)i;
            return 0;
        }
    return -EINVAL;
}

const char *coach_profile_name(coach_profile p)
{
    return (p >= 0 && p < COACH_PROFILE_COUNT) ? profile_names[p] : "unknown";
}

void coach_config_default(coach_config *cfg)
{
    memset(cfg, 0, sizeof(*cfg));
    cfg->profile = COACH_PROFILE_LANDSCAPE;
    cfg->grid = COACH_GRID_THIRDS;
    /* Half a second settles the meter within about a second and a half
     * (3 tau) yet ignores single-frame jumps (common practice for meters). */
    cfg->smooth_tau_s = 0.5;
    cfg->ready_enter = 75;
    cfg->ready_leave = 65;
    cfg->ready_dwell_s = 0.7;
    cfg->max_w = 1920;
    cfg->max_h = 1080;
}

struct coach_analyzer {
    coach_config cfg;
    coach_tone *tone;
    coach_compose *compose;
    int comp_aw, comp_ah;      /* analysis size the compose state is made for */
    int last_w, last_h;        /* frame size of the previous frame            */
    coach_score_state score;
};

static int config_ok(const coach_config *c)
{
    return c->profile >= 0 && c->profile < COACH_PROFILE_COUNT &&
           (c->grid == COACH_GRID_THIRDS || c->grid == COACH_GRID_PHI) && c->smooth_tau_s >= 0 &&
           c->ready_leave <= c->ready_enter && c->ready_dwell_s >= 0 && c->max_w >= 0 &&
           c->max_h >= 0 && c->max_w <= COACH_MAX_DIM && c->max_h <= COACH_MAX_DIM;
}

coach_analyzer *coach_create(const coach_config *cfg)
{
    coach_config def;
    if (!cfg) {
        coach_config_default(&def);
        cfg = &def;
    }
    if (!config_ok(cfg))
        return NULL;
    coach_analyzer *a = calloc(1, sizeof(*a));
    if (!a)
        return NULL;
    a->cfg = *cfg;
    a->tone = coach_tone_create(cfg->max_w, cfg->max_h);
    if (cfg->max_w > 0 && cfg->max_h > 0) {
        int s;
        coach_tone_geometry(cfg->max_w, cfg->max_h, &s, &a->comp_aw, &a->comp_ah);
    } else {
        a->comp_aw = COACH_AIMG_TARGET_W;
        a->comp_ah = COACH_AIMG_TARGET_W;
    }
    a->compose = coach_compose_create(a->comp_aw, a->comp_ah);
    if (!a->tone || !a->compose) {
        coach_destroy(a);
        return NULL;
    }
    return a;
}

void coach_destroy(coach_analyzer *a)
{
    if (!a)
        return;
    coach_tone_destroy(a->tone);
    coach_compose_destroy(a->compose);
    free(a);
}

void coach_reset(coach_analyzer *a)
{
    if (!a)
        return;
    coach_compose_reset(a->compose);
    coach_score_reset(&a->score);
}

void coach_set_profile(coach_analyzer *a, coach_profile p)
{
    /* Weights and targets are read from cfg on every frame; nothing else
     * depends on the profile, so the temporal state stays valid. */
    if (a && p >= 0 && p < COACH_PROFILE_COUNT)
        a->cfg.profile = p;
}

int coach_analyze(coach_analyzer *a, const coach_frame *f, double t, coach_result *out)
{
    if (!a || !out || !isfinite(t))
        return -EINVAL;
    int err = coach_tone_check(f);
    if (err)
        return err;

    /* Time going backwards means a new sequence; so does a new frame size
     * (motion between different geometries means nothing). */
    if ((a->score.have && t < a->score.t_last) || f->w != a->last_w || f->h != a->last_h)
        coach_reset(a);
    a->last_w = f->w;
    a->last_h = f->h;

    /* Only a frame whose analysis image is larger than any before costs an
     * allocation (a format change); the composition state is then rebuilt. */
    int s, aw, ah;
    coach_tone_geometry(f->w, f->h, &s, &aw, &ah);
    if (aw > a->comp_aw || ah > a->comp_ah) {
        int nw = aw > a->comp_aw ? aw : a->comp_aw, nh = ah > a->comp_ah ? ah : a->comp_ah;
        coach_compose *c = coach_compose_create(nw, nh);
        if (!c)
            return -ENOMEM;
        coach_compose_destroy(a->compose);
        a->compose = c;
        a->comp_aw = nw;
        a->comp_ah = nh;
    }

    memset(out, 0, sizeof(*out));
    out->t = t;
    coach_aimg img;
    if ((err = coach_tone_run(a->tone, f, out, &img)))
        return err;
    coach_compose_run(a->compose, &img, f->w, f->h, t, &a->cfg, out);
    coach_score_sharpness_ref(&a->score, t, out);
    coach_score_terms(&a->cfg, a->score.have, out);
    coach_score_update(&a->score, &a->cfg, t, out);
    coach_score_hints(&a->cfg, out);
    return 0;
}
