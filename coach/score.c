/* The score: interpretable terms, their weights per profile, smoothing over
 * time, the ready cue and the hints.
 *
 * Each term maps one measurement to 0..1 (1 = nothing to fix) with a simple
 * piecewise-linear or rational curve, so a user can read why the score is
 * what it is.  A term only takes part when its measurement exists (e.g. no
 * level term when no lines were found) and its profile weight is > 0.  The
 * score is  sum(100 * w_i * v_i) / sum(w_i)  over the terms that take part,
 * so it stays 0..100 whatever subset applies, and each term's contribution is
 * the number of points it adds.
 *
 * The breakpoints are rules of thumb (common practice), not standards:
 * exposure within a third of a stop of the target reads right; a few tenths
 * of a percent of clipped highlights go unnoticed while a few percent are a
 * visibly blown area; a roll of 1 degree is about where a tilted horizon
 * starts to show.  They are constants here so the tests and the README can
 * name them.
 *
 * Sharpness is judged the way contrast-detect autofocus judges it: against
 * the same scene, not against a fixed number.  The variance of the
 * Laplacian depends as much on what is in the frame (a seamless backdrop
 * has almost none, sea ripples plenty) as on focus, so a fixed threshold
 * called sharp product shots soft.  Live, the frame is compared with the
 * best sharpness the scene showed in the last few seconds (a decaying
 * maximum, coach_score_sharpness_ref); a drop to a third of it is already
 * a visible softening.  A still, or the first frame, has nothing to compare
 * with, so a lenient absolute floor judges it, set low enough that a sharp
 * frame of a smooth product scene passes and only a plainly blurred frame
 * fails; the floor also applies live, so a scene that was never sharp
 * cannot read sharp just because it is as soft as before.  Both curves are
 * logarithmic: for a blurred edge the variance falls by a power of the blur
 * radius, so equal ratios are equal steps of blur.
 */
#include <math.h>
#include <string.h>

#include "coach/coach_internal.h"

enum {
    T_EXPOSURE, T_HIGHLIGHTS, T_SHADOWS, T_SHARPNESS, T_COLOUR, T_LEVEL, T_HORIZON,
    T_PLACEMENT, T_BALANCE, T_EDGES, T_LEAD_ROOM, T_STEADINESS, T_SUBJECT_FOCUS, T_COUNT
};

static const struct {
    const char *name, *label;
} term_info[T_COUNT] = {
    [T_EXPOSURE] = { "exposure", "Exposure near the target" },
    [T_HIGHLIGHTS] = { "highlights", "Highlights keep detail" },
    [T_SHADOWS] = { "shadows", "Shadows keep detail" },
    [T_SHARPNESS] = { "sharpness", "Frame is sharp" },
    [T_COLOUR] = { "colour", "Colour" },
    [T_LEVEL] = { "level", "Camera is level" },
    [T_HORIZON] = { "horizon", "Horizon on a guide line" },
    [T_PLACEMENT] = { "placement", "Subject on a power point" },
    [T_BALANCE] = { "balance", "Visual weight balanced" },
    [T_EDGES] = { "edges", "Edges are clean" },
    [T_LEAD_ROOM] = { "lead_room", "Room ahead of the subject" },
    [T_STEADINESS] = { "steadiness", "Camera is steady" },
    [T_SUBJECT_FOCUS] = { "subject_focus", "Focus on the subject" },
};

/* Weights per profile, and why:
 * - landscape: a level camera and the horizon off the middle matter most;
 *   colour carries a landscape; subjects are often small or absent.
 * - portrait: the subject (placement, focus on it, room to look into) leads;
 *   no horizon; colour matters little (skin, not saturation).
 * - product: clean edges, even exposure of a light backdrop, sharpness and a
 *   steady camera (tethered, often long exposures); products don't move. */
static const double weights[COACH_PROFILE_COUNT][T_COUNT] = {
    [COACH_PROFILE_LANDSCAPE] = {
        [T_EXPOSURE] = 1.0, [T_HIGHLIGHTS] = 0.8, [T_SHADOWS] = 0.4, [T_SHARPNESS] = 0.8,
        [T_COLOUR] = 0.5, [T_LEVEL] = 1.5, [T_HORIZON] = 1.0, [T_PLACEMENT] = 0.6,
        [T_BALANCE] = 0.4, [T_EDGES] = 0.5, [T_LEAD_ROOM] = 0.3, [T_STEADINESS] = 0.6,
        [T_SUBJECT_FOCUS] = 0.2 },
    [COACH_PROFILE_PORTRAIT] = {
        [T_EXPOSURE] = 1.0, [T_HIGHLIGHTS] = 1.0, [T_SHADOWS] = 0.5, [T_SHARPNESS] = 0.6,
        [T_COLOUR] = 0.1, [T_LEVEL] = 0.6, [T_HORIZON] = 0.0, [T_PLACEMENT] = 1.2,
        [T_BALANCE] = 0.3, [T_EDGES] = 0.8, [T_LEAD_ROOM] = 0.6, [T_STEADINESS] = 0.6,
        [T_SUBJECT_FOCUS] = 1.2 },
    [COACH_PROFILE_PRODUCT] = {
        [T_EXPOSURE] = 1.0, [T_HIGHLIGHTS] = 1.0, [T_SHADOWS] = 0.6, [T_SHARPNESS] = 1.0,
        [T_COLOUR] = 0.2, [T_LEVEL] = 1.0, [T_HORIZON] = 0.0, [T_PLACEMENT] = 0.8,
        [T_BALANCE] = 0.5, [T_EDGES] = 1.0, [T_LEAD_ROOM] = 0.0, [T_STEADINESS] = 0.8,
        [T_SUBJECT_FOCUS] = 1.0 },
};

/* Exposure target in stops from middle grey: a product on a light seamless
 * backdrop is normally exposed a little above middle grey (common practice). */
static const double ev_target[COACH_PROFILE_COUNT] = { 0.0, 0.0, 0.5 };

#define EV_TOLERANCE 0.33      /* stops that still read right               */
#define EV_SPAN 2.0            /* further stops from tolerance to value 0    */
#define CLIP_HIGH_OK 0.001     /* clipped highlight fraction that is fine    */
#define CLIP_HIGH_SPAN 0.03
#define CLIP_LOW_OK 0.01       /* deep shadows are more forgiving            */
#define CLIP_LOW_SPAN 0.10
#define SHARP_REL_LO 0.03      /* sharpness / recent best scoring 0          */
#define SHARP_REL_HI 0.5       /* ... scoring 1: a drop to half goes unseen  */
#define SHARP_FLOOR_LO 4.0     /* absolute variance scoring 0 (plainly blurred) */
#define SHARP_FLOOR_HI 40.0    /* ... scoring 1 (a sharp smooth-backdrop shot) */
#define SCENE_CUT 0.6          /* luma histogram intersection with the previous
                                  frame below which the view is a new scene
                                  (a cut, the next still of a folder): blur
                                  alone keeps it above 0.8 on the demo scenes
                                  even at sigma 6 px, the two scenes share 0.4 */
#define SHARP_PEAK_TAU 6.0     /* s: the recent best decays with this constant,
                                  spanning the soft phase of a focus pull yet
                                  forgetting a more textured view within
                                  seconds after reframing                    */
#define COLOUR_LOW 15.0        /* H&S "slightly colourful": value 0 below    */
#define COLOUR_HIGH 45.0       /* H&S "averagely colourful": value 1 above   */
#define LEVEL_HALF_DEG 1.0     /* roll scoring 0.5                           */
#define HORIZON_SPAN 0.15      /* distance to the guide line scoring 0       */
#define PLACEMENT_OK 0.05      /* distance (diag) that still counts as on the
                                  point: issue 3's accuracy for the subject
                                  centre, so no points for what we cannot see */
#define PLACEMENT_SPAN 0.15    /* further distance scoring 0 (diag)          */
#define BALANCE_OK 0.3
#define BALANCE_SPAN 0.5
#define EDGE_PENALTY 0.4       /* per side with salient mass on it           */
#define LEAD_LOW 0.25          /* lead room scoring 0                        */
#define LEAD_HIGH 0.6          /* lead room scoring 1                        */
#define STEADY_HALF 0.05       /* frame widths per second scoring 0.5        */
#define FOCUS_LOW 0.5          /* subject/frame sharpness scoring 0          */
#define FOCUS_HIGH 1.5         /* ... scoring 1                              */
#define HINT_BELOW 0.75        /* terms below this value may get a hint      */
#define HINT_MIN_POINTS 3.0    /* ... when they also cost at least this many of
                                  the 100 points: a light term a little off
                                  (colour on a neutral product) is no advice */

static double clamp01(double v)
{
    return v < 0 ? 0 : v > 1 ? 1 : v;
}

/* log(v / lo) / log(hi / lo), clamped: 0 at lo, 1 at hi. */
static double log_ramp(double v, double lo, double hi)
{
    return v > 0 ? clamp01(log(v / lo) / log(hi / lo)) : 0;
}

/* The absolute floor, on the sharper of the frame and the subject's box:
 * a smooth backdrop or sky lowers the whole-frame variance without anything
 * being out of focus. */
static double sharp_floor(const coach_result *r)
{
    double sh = r->sharpness;
    if (r->has_subject_focus && isfinite(r->subject_focus) && r->subject_focus > 1)
        sh *= r->subject_focus;
    return log_ramp(sh, SHARP_FLOOR_LO, SHARP_FLOOR_HI);
}

/* The live judgement: this frame against the scene's recent best (1 when
 * there is no reference). */
static double sharp_rel(const coach_result *r)
{
    if (!(r->sharpness_ref > 0) || !isfinite(r->sharpness_ref))
        return 1;
    return log_ramp(r->sharpness / r->sharpness_ref, SHARP_REL_LO, SHARP_REL_HI);
}

void coach_score_sharpness_ref(coach_score_state *s, double t, coach_result *r)
{
    double sh = r->sharpness;
    if (!isfinite(sh) || sh < 0) {
        r->sharpness_ref = 0;
        return;
    }
    /* A cut to another scene (histogram intersection, the classic
     * shot-boundary measure) must not be judged against the old one. */
    int cut = 0;
    double n = (double)r->hist_total;
    if (s->have && n > 0) {
        uint64_t common = 0;
        for (int v = 0; v < 256; v++)
            common += r->hist[v] < s->prev_hist[v] ? r->hist[v] : s->prev_hist[v];
        cut = (double)common < SCENE_CUT * n;
    }
    memcpy(s->prev_hist, r->hist, sizeof(s->prev_hist));
    if (cut || !s->have || !(t >= s->t_last) || !(s->sharp_peak > 0))
        s->sharp_peak = sh;
    else
        s->sharp_peak = fmax(sh, s->sharp_peak * exp(-(t - s->t_last) / SHARP_PEAK_TAU));
    r->sharpness_ref = s->sharp_peak;
}

/* Products are commonly centred on a seamless backdrop (common practice in
 * catalogue work): in the product profile the frame centre counts as a
 * place for the subject as good as a power point.  Distance from the
 * subject centre to the frame centre as a fraction of the diagonal. */
static double centre_distance(const coach_result *r)
{
    double w = r->width > 0 ? r->width : 1, h = r->height > 0 ? r->height : 1;
    return hypot((r->subject.x - 0.5) * w, (r->subject.y - 0.5) * h) / hypot(w, h);
}

static int centre_nearer(const coach_config *cfg, const coach_result *r)
{
    return cfg->profile == COACH_PROFILE_PRODUCT && r->has_subject &&
           !(centre_distance(r) >= r->placement);
}

/* The two guide lines (fractions of the height) of the chosen grid. */
static double guide_line(coach_grid g, int lower)
{
    double a = g == COACH_GRID_PHI ? 0.381966 : 1.0 / 3.0; /* 1/phi^2 = 0.381966 */
    return lower ? 1.0 - a : a;
}

void coach_score_terms(const coach_config *cfg, int have_prev, coach_result *r)
{
    double v[T_COUNT];
    int on[T_COUNT] = { 0 };
    coach_profile p = cfg->profile < COACH_PROFILE_COUNT ? cfg->profile : COACH_PROFILE_LANDSCAPE;

    if (isfinite(r->exposure_ev)) {
        double d = fabs(r->exposure_ev - ev_target[p]);
        v[T_EXPOSURE] = 1 - clamp01((d - EV_TOLERANCE) / EV_SPAN);
        on[T_EXPOSURE] = 1;
    }
    v[T_HIGHLIGHTS] = 1 - clamp01((r->clip_high - CLIP_HIGH_OK) / CLIP_HIGH_SPAN);
    v[T_SHADOWS] = 1 - clamp01((r->clip_low - CLIP_LOW_OK) / CLIP_LOW_SPAN);
    on[T_HIGHLIGHTS] = isfinite(r->clip_high);
    on[T_SHADOWS] = isfinite(r->clip_low);
    if (isfinite(r->sharpness) && r->sharpness >= 0) {
        v[T_SHARPNESS] = fmin(sharp_floor(r), sharp_rel(r));
        on[T_SHARPNESS] = 1;
    }
    if (isfinite(r->colourfulness)) {
        v[T_COLOUR] = clamp01((r->colourfulness - COLOUR_LOW) / (COLOUR_HIGH - COLOUR_LOW));
        on[T_COLOUR] = 1;
    }
    if (r->has_tilt && isfinite(r->tilt_deg)) {
        double q = r->tilt_deg / LEVEL_HALF_DEG;
        double conf = isfinite(r->tilt_confidence) ? clamp01(r->tilt_confidence) : 1;
        /* a doubtful reading costs proportionally less */
        v[T_LEVEL] = 1 - conf * (1 - 1 / (1 + q * q));
        on[T_LEVEL] = 1;
    }
    if (r->has_horizon && isfinite(r->horizon_y)) {
        double d = fmin(fabs(r->horizon_y - guide_line(cfg->grid, 0)),
                        fabs(r->horizon_y - guide_line(cfg->grid, 1)));
        v[T_HORIZON] = 1 - clamp01(d / HORIZON_SPAN);
        on[T_HORIZON] = 1;
    }
    if (r->has_subject) {
        if (isfinite(r->placement)) {
            double d = centre_nearer(cfg, r) ? centre_distance(r) : r->placement;
            v[T_PLACEMENT] = 1 - clamp01((d - PLACEMENT_OK) / PLACEMENT_SPAN);
            on[T_PLACEMENT] = 1;
        }
        if (isfinite(r->balance_lr) && isfinite(r->balance_tb)) {
            double b = fmax(fabs(r->balance_lr), fabs(r->balance_tb));
            v[T_BALANCE] = 1 - clamp01((b - BALANCE_OK) / BALANCE_SPAN);
            on[T_BALANCE] = 1;
        }
        int n = __builtin_popcount(r->edge_intrusions & 15u);
        v[T_EDGES] = clamp01(1 - EDGE_PENALTY * n);
        on[T_EDGES] = 1;
    }
    if (r->has_lead_room && isfinite(r->lead_room)) {
        v[T_LEAD_ROOM] = clamp01((r->lead_room - LEAD_LOW) / (LEAD_HIGH - LEAD_LOW));
        on[T_LEAD_ROOM] = 1;
    }
    if (have_prev && r->has_motion && isfinite(r->motion_px_s) && r->width > 0) {
        double m = r->motion_px_s / r->width / STEADY_HALF;
        v[T_STEADINESS] = 1 / (1 + m * m);
        on[T_STEADINESS] = 1;
    }
    if (r->has_subject_focus && isfinite(r->subject_focus)) {
        v[T_SUBJECT_FOCUS] = clamp01((r->subject_focus - FOCUS_LOW) / (FOCUS_HIGH - FOCUS_LOW));
        on[T_SUBJECT_FOCUS] = 1;
    }

    double wsum = 0;
    for (int i = 0; i < T_COUNT; i++)
        if (on[i] && weights[p][i] > 0)
            wsum += weights[p][i];
    r->nterms = 0;
    r->score_raw = 0;
    for (int i = 0; i < T_COUNT && r->nterms < COACH_MAX_TERMS; i++) {
        if (!on[i] || weights[p][i] <= 0)
            continue;
        coach_term *t = &r->terms[r->nterms++];
        t->name = term_info[i].name;
        t->label = term_info[i].label;
        if (i == T_PLACEMENT && p == COACH_PROFILE_PRODUCT)
            t->label = "Subject centred or on a power point";
        t->value = v[i];
        t->weight = weights[p][i];
        t->contribution = 100 * t->weight * t->value / wsum;
        r->score_raw += t->contribution;
    }
}

double coach_smooth_step(double prev, double raw, double dt, double tau)
{
    /* First-order low-pass sampled at irregular times: the exact response of
     * dy/dt = (raw - y) / tau over dt with raw held constant. */
    if (!(tau > 0) || !(dt > 0))
        return tau > 0 ? prev : raw;
    double alpha = 1 - exp(-dt / tau);
    return prev + alpha * (raw - prev);
}

void coach_score_reset(coach_score_state *s)
{
    memset(s, 0, sizeof(*s));
}

void coach_score_update(coach_score_state *s, const coach_config *cfg, double t, coach_result *r)
{
    if (!s->have || !(t >= s->t_last)) {
        /* a new sequence: the smoothing and the cue start over (the
         * sharpness reference was set for this frame already) */
        s->ready = s->above = 0;
        s->above_t = 0;
        s->score = r->score_raw;
    } else {
        s->score = coach_smooth_step(s->score, r->score_raw, t - s->t_last, cfg->smooth_tau_s);
    }
    s->have = 1;
    s->t_last = t;

    /* Hysteresis: enter only after the score has stayed >= ready_enter for
     * the dwell time; leave only below ready_leave.  A score wandering
     * between the two thresholds keeps whatever state it had. */
    if (s->ready) {
        if (s->score < cfg->ready_leave) {
            s->ready = 0;
            s->above = 0;
        }
    } else if (s->score >= cfg->ready_enter) {
        if (!s->above) {
            s->above = 1;
            s->above_t = t;
        }
        if (t - s->above_t >= cfg->ready_dwell_s)
            s->ready = 1;
    } else {
        s->above = 0;
    }
    r->score = s->score;
    r->ready = s->ready;
}

/* ---- hints ------------------------------------------------------------- */

static const char *const point_names[4] = { "upper-left", "upper-right", "lower-left",
                                            "lower-right" };

static const char *side_name(unsigned bit)
{
    switch (bit) {
    case COACH_EDGE_LEFT: return "left";
    case COACH_EDGE_RIGHT: return "right";
    case COACH_EDGE_TOP: return "top";
    default: return "bottom";
    }
}

static void stops(coach_sbuf *b, double s)
{
    coach_sb_num(b, s, 1);
    coach_sb_str(b, fabs(s) > 1.05 ? " stops" : " stop");
}

static void hint_text(int id, const coach_config *cfg, const coach_result *r, coach_sbuf *b)
{
    switch (id) {
    case T_EXPOSURE: {
        double d = r->exposure_ev - ev_target[cfg->profile < COACH_PROFILE_COUNT ? cfg->profile : 0];
        coach_sb_str(b, d > 0 ? "Lower the exposure by about " : "Raise the exposure by about ");
        stops(b, fabs(d));
        break;
    }
    case T_HIGHLIGHTS: {
        /* a third of a stop per 1.5 % clipped, at most 2 stops (common practice) */
        double s = ceil(r->clip_high * 100 / 1.5) / 3.0;
        coach_sb_str(b, "Highlights are clipping: try about -");
        stops(b, s < 1.0 / 3 ? 1.0 / 3 : s > 2 ? 2 : s);
        break;
    }
    case T_SHADOWS:
        coach_sb_str(b, "Shadows are blocking up: add fill light or open up ");
        stops(b, r->clip_low > 0.05 ? 1.0 : 2.0 / 3);
        break;
    case T_SHARPNESS:
        coach_sb_str(b, sharp_rel(r) < sharp_floor(r)
                            ? "Refocus or hold still: softer than a moment ago"
                            : "Refocus or hold still: the frame looks soft");
        break;
    case T_COLOUR:
        coach_sb_str(b, "Look for stronger colour: the scene is ");
        coach_sb_str(b, coach_colourfulness_word(r->colourfulness));
        break;
    case T_LEVEL:
        /* tilt_deg > 0: the horizon's right end is high in the picture,
         * which is what a camera rolled clockwise (seen from behind) shows;
         * turning the camera counterclockwise levels it. */
        coach_sb_str(b, "Rotate the camera ");
        coach_sb_num(b, fabs(r->tilt_deg), 1);
        coach_sb_str(b, r->tilt_deg > 0 ? "\xc2\xb0 counterclockwise" : "\xc2\xb0 clockwise");
        break;
    case T_HORIZON: {
        double up = guide_line(cfg->grid, 0), lo = guide_line(cfg->grid, 1);
        int lower = fabs(r->horizon_y - lo) < fabs(r->horizon_y - up);
        double target = lower ? lo : up;
        /* the horizon rises in the picture when the camera tilts down */
        coach_sb_str(b, r->horizon_y > target ? "Tilt down to put the horizon on the "
                                              : "Tilt up to put the horizon on the ");
        coach_sb_str(b, lower ? "lower " : "upper ");
        coach_sb_str(b, cfg->grid == COACH_GRID_PHI ? "phi line" : "third line");
        break;
    }
    case T_PLACEMENT:
        if (centre_nearer(cfg, r)) {
            coach_sb_str(b, "Centre the product in the frame");
            break;
        }
        coach_sb_str(b, "Move the subject toward the ");
        coach_sb_str(b, point_names[r->placement_point & 3]);
        coach_sb_str(b, cfg->grid == COACH_GRID_PHI ? " phi point" : " third");
        break;
    case T_BALANCE: {
        int lr = fabs(r->balance_lr) >= fabs(r->balance_tb);
        double v = lr ? r->balance_lr : r->balance_tb;
        coach_sb_str(b, "Even out the frame: most of the weight sits ");
        coach_sb_str(b, lr ? (v > 0 ? "on the right" : "on the left")
                           : (v > 0 ? "at the bottom" : "at the top"));
        break;
    }
    case T_EDGES: {
        coach_sb_str(b, "Clear the ");
        int n = 0, total = __builtin_popcount(r->edge_intrusions & 15u);
        for (unsigned bit = 1; bit <= 8; bit <<= 1) {
            if (!(r->edge_intrusions & bit))
                continue;
            if (n > 0)
                coach_sb_str(b, n == total - 1 ? " and " : ", ");
            coach_sb_str(b, side_name(bit));
            n++;
        }
        coach_sb_str(b, total > 1 ? " edges: something cuts in" : " edge: something cuts in");
        break;
    }
    case T_LEAD_ROOM:
        coach_sb_str(b, "Leave more room ahead of the moving subject");
        break;
    case T_STEADINESS:
        coach_sb_str(b, "Hold the camera steadier: the frame drifts ");
        coach_sb_num(b, r->motion_px_s, 0);
        coach_sb_str(b, " px/s");
        break;
    case T_SUBJECT_FOCUS:
        coach_sb_str(b, r->subject_focus < 1 ? "Focus on the subject: the background is sharper"
                                             : "Focus on the subject to make it stand out");
        break;
    default:
        break;
    }
}

static int term_id(const char *name)
{
    for (int i = 0; i < T_COUNT; i++)
        if (term_info[i].name == name || strcmp(term_info[i].name, name) == 0)
            return i;
    return -1;
}

void coach_score_hints(const coach_config *cfg, coach_result *r)
{
    /* Worst first: rank by the points a term loses, weight * (1 - value);
     * only terms that lose a meaningful share of the 100 get advice. */
    int order[COACH_MAX_TERMS], n = 0;
    double wsum = 0;
    for (int i = 0; i < r->nterms; i++)
        wsum += r->terms[i].weight;
    for (int i = 0; i < r->nterms; i++)
        if (r->terms[i].value < HINT_BELOW &&
            100 * r->terms[i].weight * (1 - r->terms[i].value) >= HINT_MIN_POINTS * wsum)
            order[n++] = i;
    for (int i = 1; i < n; i++) {
        int k = order[i], j = i;
        double lk = r->terms[k].weight * (1 - r->terms[k].value);
        while (j > 0 && r->terms[order[j - 1]].weight * (1 - r->terms[order[j - 1]].value) < lk) {
            order[j] = order[j - 1];
            j--;
        }
        order[j] = k;
    }
    r->nhints = 0;
    for (int i = 0; i < n && r->nhints < COACH_MAX_HINTS; i++) {
        int id = term_id(r->terms[order[i]].name);
        if (id < 0)
            continue;
        coach_sbuf b = { r->hints[r->nhints], COACH_HINT_LEN, 0 };
        b.p[0] = 0;
        hint_text(id, cfg, r, &b);
        if (b.len > 0)
            r->nhints++;
    }
}

const char *coach_colourfulness_word(double m)
{
    /* Hasler & Suesstrunk 2003, Table 2: the metric value of each category;
     * a value at or above a category's number earns its word. */
    static const struct { double m; const char *word; } cat[] = {
        { 109, "extremely colourful" }, { 82, "highly colourful" },
        { 59, "quite colourful" },      { 45, "averagely colourful" },
        { 33, "moderately colourful" }, { 15, "slightly colourful" },
    };
    for (size_t i = 0; i < sizeof(cat) / sizeof(cat[0]); i++)
        if (m >= cat[i].m)
            return cat[i].word;
    return "not colourful";
}
