/* Composition analysis of one frame: level and horizon (level.c), subject,
 * balance and edge intrusions (saliency.c), steadiness (motion.c), and here
 * the parts that combine them: placement against the power points, lead
 * room from the subject's motion relative to the scene, and subject focus.
 *
 * Where the time goes (1080p frames, 320x180 analysis image, one core):
 * the whole stage took ~1.0-1.3 ms and 9.5 M instructions per frame in the
 * bench build (15 M in the -O2 release build); with its kernels vectorised,
 * fused and given AVX2 copies ~0.55-0.65 ms and 5.1 M (4.7 M).  Level ~45 %
 * of it, saliency ~35 %, motion ~15 %; a good part of what is left is
 * reading the analysis planes (1.4 MB) from memory.
 */
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "coach/coach_internal.h"

/* Lead room needs the subject to move across the scene at least this fast
 * along an axis (frame widths, or heights, per second) — slower drift is
 * not a direction of travel. */
#define LEAD_MIN_SPEED 0.03
/* Track length the subject's velocity is fitted over, seconds, and the
 * ring that holds it (30 fps for a second, with room). */
#define LEAD_WINDOW_S 1.0
#define LEAD_HIST 48

typedef struct lead_sample {
    double t;
    double x, y;       /* in the scene: image position minus the camera's pan */
    double ximg, yimg; /* in the image                                      */
} lead_sample;
/* A centre jump larger than this (fraction of the frame) between frames
 * means another region won: restart the track. */
#define TRACK_JUMP 0.15

struct coach_compose {
    int max_w, max_h;
    coach_level *level;
    coach_saliency *sal;
    coach_motion *motion;
    coach_level_est last_level;
    const float *last_map;
    /* subject track */
    lead_sample track[LEAD_HIST];  /* ring of the subject's recent positions */
    int track_n, track_head;
    double pan_x, pan_y;           /* accumulated camera shift, frame widths
                                      and heights */
    double t_prev;
    int have_t;
};

coach_compose *coach_compose_create(int max_aw, int max_ah)
{
    coach_compose *c = calloc(1, sizeof *c);
    if (!c)
        return NULL;
    c->max_w = max_aw;
    c->max_h = max_ah;
    c->level = coach_level_create(max_aw, max_ah);
    c->sal = coach_saliency_create(max_aw, max_ah);
    c->motion = coach_motion_create(max_aw);
    if (!c->level || !c->sal || !c->motion) {
        coach_compose_destroy(c);
        return NULL;
    }
    return c;
}

void coach_compose_destroy(coach_compose *c)
{
    if (!c)
        return;
    coach_level_destroy(c->level);
    coach_saliency_destroy(c->sal);
    coach_motion_destroy(c->motion);
    free(c);
}

void coach_compose_reset(coach_compose *c)
{
    if (!c)
        return;
    coach_motion_reset(c->motion);
    c->track_n = 0;
    c->track_head = 0;
    c->pan_x = c->pan_y = 0;
    c->have_t = 0;
}

/* Power points: the crossings of the grid lines, at 1/3 and 2/3 for the
 * rule of thirds, at 1/phi^2 ~ 0.382 and 1/phi ~ 0.618 for the phi grid. */
static void placement(const coach_config *cfg, int fw, int fh, coach_result *out)
{
    const double a = (cfg && cfg->grid == COACH_GRID_PHI) ? (3.0 - sqrt(5.0)) / 2.0 : 1.0 / 3.0;
    const double px[4] = {a, 1 - a, a, 1 - a}, py[4] = {a, a, 1 - a, 1 - a};
    const double diag = sqrt((double)fw * fw + (double)fh * fh);
    double best = 1e30;
    int bi = 0;
    for (int i = 0; i < 4; i++) {
        double dx = (out->subject.x - px[i]) * fw, dy = (out->subject.y - py[i]) * fh;
        double d = sqrt(dx * dx + dy * dy);
        if (d < best) {
            best = d;
            bi = i;
        }
    }
    out->placement = best / diag;
    out->placement_point = bi;
}

/* Sharpness inside the subject box against the whole analysed area, each
 * the variance of the full-resolution Laplacian from the per-cell sums. */
static void subject_focus(const coach_aimg *img, const coach_box *b, coach_result *out)
{
    if (!img->lap || !img->lap_sq)
        return;
    const int w = img->w, h = img->h;
    int x0 = (int)ceil((b->x - 0.5 * b->w) * w - 0.5);
    int x1 = (int)floor((b->x + 0.5 * b->w) * w - 0.5);
    int y0 = (int)ceil((b->y - 0.5 * b->h) * h - 0.5);
    int y1 = (int)floor((b->y + 0.5 * b->h) * h - 0.5);
    if (x0 < 0) x0 = 0;
    if (y0 < 0) y0 = 0;
    if (x1 > w - 1) x1 = w - 1;
    if (y1 > h - 1) y1 = h - 1;
    if (x1 - x0 < 1 || y1 - y0 < 1)
        return;
    double s1 = 0, s2 = 0, b1 = 0, b2 = 0;
    for (int y = 0; y < h; y++) {
        const float *l1 = img->lap + (size_t)y * w, *l2 = img->lap_sq + (size_t)y * w;
        s1 += coach_sum4(l1, w);
        s2 += coach_sum4(l2, w);
        if (y >= y0 && y <= y1) {
            b1 += coach_sum4(l1 + x0, x1 - x0 + 1);
            b2 += coach_sum4(l2 + x0, x1 - x0 + 1);
        }
    }
    const double n = (double)w * h, nb = (double)(x1 - x0 + 1) * (y1 - y0 + 1);
    double var_all = s2 / n - (s1 / n) * (s1 / n);
    double var_box = b2 / nb - (b1 / nb) * (b1 / nb);
    if (var_all <= 1e-6)
        return;
    out->has_subject_focus = 1;
    out->subject_focus = (var_box > 0 ? var_box : 0) / var_all;
}

/* Velocity of one coordinate of the track (scene units per second) into
 * *v: the least-squares slope over the last LEAD_WINDOW_S seconds, or 0
 * when it is under LEAD_MIN_SPEED or three standard errors, so the jitter
 * of the detected centre does not make a direction out of a subject that
 * stands still.  Returns 0 when the track is too short to tell (fewer than
 * 6 samples or under ~0.15 s), else 1. */
static int track_speed(const coach_compose *c, double t, int use_y, double *v)
{
    *v = 0;
    double S = 0, St = 0, Sv = 0, Stt = 0, Stv = 0;
    int n = 0;
    for (int i = 0; i < c->track_n; i++) {
        const lead_sample *q = &c->track[(c->track_head + LEAD_HIST - 1 - i) % LEAD_HIST];
        if (t - q->t > LEAD_WINDOW_S)
            break;
        double tt = q->t - t, pos = use_y ? q->y : q->x;
        S += 1;
        St += tt;
        Sv += pos;
        Stt += tt * tt;
        Stv += tt * pos;
        n++;
    }
    double den = S * Stt - St * St;
    if (n < 6 || den <= 0 || Stt / S - (St / S) * (St / S) < 0.04 * 0.04)
        return 0;
    double slope = (S * Stv - St * Sv) / den, icpt = (Sv - slope * St) / S;
    double sr = 0;
    for (int i = 0; i < n; i++) {
        const lead_sample *q = &c->track[(c->track_head + LEAD_HIST - 1 - i) % LEAD_HIST];
        double r = (use_y ? q->y : q->x) - (icpt + slope * (q->t - t));
        sr += r * r;
    }
    double se = sqrt(sr / (n - 2) * S / den);
    if (fabs(slope) >= LEAD_MIN_SPEED && fabs(slope) >= 3.0 * se)
        *v = slope;
    return 1;
}

/* Lead room: the subject's velocity relative to the scene decides which
 * way is "ahead", in any direction; lead room is the share of the free
 * space around the subject's box that lies ahead of it.  Along one axis
 * that is the free width (or height) in front over the free width on both
 * sides; for a slanted path the two axes are weighted by the speed along
 * each, in pixels, so a subject moving mostly up is judged mostly by the
 * room above it.  Positions are tracked in scene coordinates (the image
 * position minus the accumulated camera shift, so panning with a moving
 * subject still counts). */
static void lead_room(coach_compose *c, double t, int measured, double shift_fx,
                      double shift_fy, int full_w, int full_h, coach_result *out)
{
    if (measured) {
        c->pan_x += shift_fx;
        c->pan_y += shift_fy;
    }
    if (!out->has_subject) {
        c->track_n = 0;
        return;
    }
    const double x = out->subject.x, y = out->subject.y;
    if (c->track_n > 0) {
        const lead_sample *last = &c->track[(c->track_head + LEAD_HIST - 1) % LEAD_HIST];
        if (t <= last->t || fabs(x - last->ximg) > TRACK_JUMP || fabs(y - last->yimg) > TRACK_JUMP)
            c->track_n = 0;
    }
    lead_sample *sm = &c->track[c->track_head];
    sm->t = t;
    sm->x = x - c->pan_x;
    sm->y = y - c->pan_y;
    sm->ximg = x;
    sm->yimg = y;
    c->track_head = (c->track_head + 1) % LEAD_HIST;
    if (c->track_n < LEAD_HIST)
        c->track_n++;
    double vx, vy;
    if (!track_speed(c, t, 0, &vx) || !track_speed(c, t, 1, &vy))
        return;
    /* free space on each side of the box, fractions of the frame */
    double left = fmax(0, x - 0.5 * out->subject.w), right = fmax(0, 1 - (x + 0.5 * out->subject.w));
    double top = fmax(0, y - 0.5 * out->subject.h), bottom = fmax(0, 1 - (y + 0.5 * out->subject.h));
    double wx = fabs(vx) * full_w, wy = fabs(vy) * full_h; /* px/s along each axis */
    double ahead = wx * (vx > 0 ? right : left) + wy * (vy > 0 ? bottom : top);
    double behind = wx * (vx > 0 ? left : right) + wy * (vy > 0 ? top : bottom);
    if (!(wx + wy > 0) || ahead + behind <= 0)
        return;
    out->has_lead_room = 1;
    out->lead_room = ahead / (ahead + behind);
}

void coach_compose_run(coach_compose *c, const coach_aimg *img, int full_w, int full_h,
                       double t, const coach_config *cfg, coach_result *out)
{
    out->has_tilt = out->has_horizon = out->has_subject = 0;
    out->has_lead_room = out->has_subject_focus = 0;
    out->tilt_deg = out->tilt_confidence = out->horizon_y = 0;
    out->level_source = COACH_LEVEL_NONE;
    out->placement = 0;
    out->placement_point = 0;
    out->balance_lr = out->balance_tb = 0;
    out->edge_intrusions = 0;
    out->lead_room = 0;
    out->motion_px_s = 0;
    out->has_motion = 0;
    out->subject_focus = 0;
    memset(&out->subject, 0, sizeof out->subject);
    if (!c || !img || !img->luma || img->w < 16 || img->h < 16 || img->w > c->max_w ||
        img->h > c->max_h || full_w < 1 || full_h < 1)
        return;
    const int s = img->scale > 0 ? img->scale : 1;
    if (c->have_t && t < c->t_prev)
        coach_compose_reset(c);

    /* Level and horizon. */
    coach_level_est *le = &c->last_level;
    coach_level_run(c->level, img->luma, img->w, img->h, le);
    if (le->has_tilt) {
        out->has_tilt = 1;
        out->tilt_deg = le->tilt_deg;
        out->level_source = le->source;
        out->tilt_confidence = le->confidence;
    }
    if (le->has_horizon) {
        /* The vertical centre line x = full_w / 2 in analysis pixels, whose
         * pixel i covers full-resolution columns [i*s, (i+1)*s). */
        double xa = 0.5 * full_w / s - 0.5;
        double ya = le->horizon_a + le->horizon_b * xa;
        double yf = (ya + 0.5) * s / full_h;
        if (yf >= 0 && yf <= 1) {
            out->has_horizon = 1;
            out->horizon_y = yf;
        }
    }

    /* Subject, balance, intrusions.  The analysis image covers
     * w*s x h*s full-resolution pixels (the remainder is cut): map its
     * fractions back onto the whole frame. */
    coach_salient sa;
    double hl[2];
    if (le->has_horizon) {
        /* y = a + b x in analysis pixels to map cells: x = (xc + 0.5) w / N - 0.5 */
        const double kx = (double)img->w / COACH_SAL_N, ky = (double)COACH_SAL_N / img->h;
        hl[1] = le->horizon_b * kx * ky;
        hl[0] = (le->horizon_a + le->horizon_b * (0.5 * kx - 0.5) + 0.5) * ky - 0.5;
    }
    c->last_map = coach_saliency_run(c->sal, img->luma, img->r, img->g, img->b, img->w, img->h,
                                     le->has_horizon ? hl : NULL, &sa);
    const double fx = (double)img->w * s / full_w, fy = (double)img->h * s / full_h;
    out->balance_lr = sa.balance_lr;
    out->balance_tb = sa.balance_tb;
    out->edge_intrusions = sa.edges;
    if (sa.has_subject) {
        out->has_subject = 1;
        out->subject.x = sa.subject.x * fx;
        out->subject.y = sa.subject.y * fy;
        out->subject.w = sa.subject.w * fx;
        out->subject.h = sa.subject.h * fy;
        placement(cfg, full_w, full_h, out);
        subject_focus(img, &sa.subject, out);
    }

    /* Steadiness. */
    double dx = 0, dy = 0;
    int measured = coach_motion_run(c->motion, img->luma, img->w, img->h,
                                    sa.has_subject ? &sa.subject : NULL, &dx, &dy);
    if (measured && c->have_t && t > c->t_prev) {
        out->has_motion = 1;
        out->motion_px_s = sqrt(dx * dx + dy * dy) * s / (t - c->t_prev);
    }
    lead_room(c, t, measured, dx * s / full_w, dy * s / full_h, full_w, full_h, out);
    c->t_prev = t;
    c->have_t = 1;
}

/* Debug views for the inspect subcommand. */
const coach_level_est *coach_compose_level(const coach_compose *c)
{
    return c ? &c->last_level : NULL;
}

const float *coach_compose_saliency(const coach_compose *c)
{
    return c ? c->last_map : NULL;
}
