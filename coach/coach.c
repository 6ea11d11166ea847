/* The analyzer: configuration, format and profile names, and the per-frame
 * driver that runs the tone pass, the composition analysis and the score. */
#include <errno.h>
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
