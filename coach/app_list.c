/* vfcoach --list: the cameras, grouped by format, one line per size. */
#include <stdio.h>
#include <string.h>

#include "capture/capture.h"
#include "coach/app.h"

static void print_rates(FILE *out, const cap_camera_mode *m)
{
    if (m->nfps == 0) {
        fputs("rate not reported", out);
        return;
    }
    if (m->fps_range) {
        fprintf(out, "any rate from %.4g to %.4g fps", m->fps[1], m->fps[0]);
        return;
    }
    for (int i = 0; i < m->nfps; i++)
        fprintf(out, "%s%.4g", i ? ", " : "", m->fps[i]);
    fputs(" fps", out);
}

static void print_camera(FILE *out, const cap_camera_info *c)
{
    if (c->problem[0]) {
        /* the line names the node first; it is the heading already */
        const char *why = c->problem;
        size_t k = strlen(c->node);
        if (!strncmp(why, c->node, k) && !strncmp(why + k, ": ", 2))
            why += k + 2;
        fprintf(out, "%s\n  %s\n", c->node, why);
    } else {
        fprintf(out, "%s  \"%s\"\n", c->node, c->card);
        fprintf(out, "  driver %s, bus %s%s\n", c->driver, c->bus,
                c->multiplanar ? ", multi-planar (through libv4l2's plugin)" : "");
    }
    if (c->by_id[0] || c->by_path[0]) {
        if (c->by_id[0])
            fprintf(out, "  stable link  %s\n", c->by_id);
        if (c->by_path[0])
            fprintf(out, "  port link    %s\n", c->by_path);
    } else {
        fputs("  stable links none (udev made no /dev/v4l links here)\n", out);
    }
    uint32_t last = 0;
    for (int i = 0; i < c->nmodes; i++) {
        const cap_camera_mode *m = &c->modes[i];
        char cc[8];
        if (i == 0 || m->fourcc != last)
            fprintf(out, "  %-4s  %s — %s\n", cap_fourcc_str(m->fourcc, cc), m->desc,
                    m->passthrough == 1 ? "analysed as it comes" :
                    m->passthrough == 2 ? "reordered, colour kept as sent" : "decoded or converted to RGB first");
        last = m->fourcc;
        fprintf(out, "        %5dx%-5d ", m->w, m->h);
        print_rates(out, m);
        if (m->chosen_fps > 0)
            fprintf(out, "   <- used by default, at %.4g fps", m->chosen_fps);
        fputc('\n', out);
    }
}

int app_list_cameras(FILE *out)
{
    cap_camera_info *list = NULL;
    char err[256];
    int n = cap_camera_list(&list, err, sizeof err);
    if (n < 0) {
        fprintf(stderr, "vfcoach: %s\n", err);
        return 1;
    }
    if (n == 0) {
        fputs("No cameras found (no video capture device is connected or visible).\n"
              "Try the demo scene instead: vfcoach --source demo\n", out);
        return 0;
    }
    for (int i = 0; i < n; i++) {
        if (i)
            fputc('\n', out);
        print_camera(out, &list[i]);
    }
    int first = 0;
    while (first < n - 1 && list[first].problem[0])
        first++;
    fprintf(out, "\nChoose one with --device NODE, a link above, or the name in quotes;\n"
                 "without --device vfcoach takes %s.\n", list[first].node);
    cap_camera_list_free(list, n);
    return 0;
}
