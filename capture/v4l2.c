/* PLACEHOLDER until the V4L2 source lands. Owned by the camera work. */
#include <stdio.h>

#include "capture/capture_internal.h"

cap_source *cap_v4l2_open(const char *dev, const cap_source_opts *o, char *err, size_t errlen)
{
    (void)o;
    snprintf(err, errlen, "%s: camera support is not built yet", dev);
    return NULL;
}
