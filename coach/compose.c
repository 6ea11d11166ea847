/* PLACEHOLDER until the composition analysis lands: reports no composition
 * measurements (every has_* flag 0).  Owned by the composition work. */
#include <stdlib.h>

#include "coach/coach_internal.h"

struct coach_compose { int unused; };

coach_compose *coach_compose_create(int max_aw, int max_ah)
{
    (void)max_aw; (void)max_ah;
    return calloc(1, sizeof(coach_compose));
}
void coach_compose_destroy(coach_compose *c) { free(c); }
void coach_compose_reset(coach_compose *c) { (void)c; }
void coach_compose_run(coach_compose *c, const coach_aimg *img, int full_w, int full_h,
                       double t, const coach_config *cfg, coach_result *out)
{
    (void)c; (void)img; (void)full_w; (void)full_h; (void)t; (void)cfg;
    out->has_tilt = out->has_horizon = out->has_subject = 0;
    out->has_lead_room = out->has_subject_focus = 0;
}
