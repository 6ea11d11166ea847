/* Source dispatch: picks the source kind from the spec the user gave. */
#include <stdio.h>
#include <string.h>
#include <sys/stat.h>
#include <time.h>

#include "capture/capture_internal.h"

cap_source *cap_source_open(const char *spec, const cap_source_opts *o, char *err, size_t errlen)
{
    static const cap_source_opts defaults = {0};
    if (!o)
        o = &defaults;
    if (!spec || !*spec) {
        snprintf(err, errlen, "source: empty name (use demo, demo:tabletop, a file, a folder or a camera)");
        return NULL;
    }
    if (!strcmp(spec, "demo"))
        return cap_demo_open("harbour", o, err, errlen);
    if (!strncmp(spec, "demo:", 5))
        return cap_demo_open(spec + 5, o, err, errlen);
    /* Only regular files and folders are stills: a device node, a by-id link
     * to one or a card name goes to the camera code, which explains itself. */
    struct stat st;
    if (stat(spec, &st) == 0 && (S_ISREG(st.st_mode) || S_ISDIR(st.st_mode)))
        return cap_still_open(spec, o, err, errlen);
    return cap_v4l2_open(spec, o, err, errlen);
}

void cap_source_destroy(cap_source *s)
{
    if (s && s->ops && s->ops->destroy)
        s->ops->destroy(s);
}

const char *cap_source_name(const cap_source *s)
{
    return s ? s->name : "";
}

double cap_source_fps(const cap_source *s)
{
    return s && s->fps > 0 ? s->fps : 30.0;
}

int cap_source_is_live(const cap_source *s)
{
    return s ? s->live : 0;
}

size_t cap_source_max_bytes(const cap_source *s)
{
    return s ? s->max_bytes : 0;
}

void cap_meta_xrgb(cap_frame *meta, const uint8_t *data, int w, int h, uint64_t seq)
{
    struct timespec ts;
    clock_gettime(CLOCK_MONOTONIC, &ts);
    memset(meta, 0, sizeof *meta);
    meta->view.data = data;
    meta->view.w = w;
    meta->view.h = h;
    meta->view.stride = w * 4;
    meta->view.format = COACH_FMT_XRGB8888;
    meta->seq = seq;
    meta->t_capture = (double)ts.tv_sec + (double)ts.tv_nsec * 1e-9;
}
