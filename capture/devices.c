/* Finding cameras: libudev enumeration for --list and the default camera,
 * stable names (by-id/by-path links, card names) resolved to nodes, the
 * identity a camera keeps across unplug and replug, and the udev monitor
 * that tells when it is back.
 *
 * Threads: the watch and the identity functions are called from the
 * capture thread during recovery, the rest from the owner's thread; each
 * call makes its own udev context, so nothing is shared. */
#include <ctype.h>
#include <errno.h>
#include <fcntl.h>
#include <libudev.h>
#include <linux/videodev2.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <strings.h>
#include <sys/ioctl.h>
#include <sys/stat.h>
#include <sys/sysmacros.h>
#include <unistd.h>

#include "capture/v4l2_internal.h"

/* ---- identity ---------------------------------------------------------- */

int cap_dev_match(const cap_dev_id *want, const cap_dev_id *have)
{
    if (want->index >= 0 && have->index >= 0 && want->index != have->index)
        return 0;
    /* The first key both sides know decides; a serial follows the camera
     * to another port, ID_PATH and the parent device follow the port. */
    if (want->serial[0] && have->serial[0])
        return !strcmp(want->serial, have->serial);
    if (want->id_path[0] && have->id_path[0])
        return !strcmp(want->id_path, have->id_path);
    /* One parent can carry several cameras with their own bus_info (vivid
     * instances share one platform device): when both sides know it, it
     * must agree too. */
    if (want->parent[0] && have->parent[0])
        return !strcmp(want->parent, have->parent) &&
               (!want->bus[0] || !have->bus[0] || !strcmp(want->bus, have->bus));
    if (want->bus[0] && have->bus[0] && want->card[0] && have->card[0])
        return !strcmp(want->bus, have->bus) && !strcmp(want->card, have->card);
    return 0;
}

/* Bounded string copy that always terminates; NULL copies as "". */
static void copy_str(char *dst, size_t n, const char *src)
{
    size_t k = src ? strnlen(src, n - 1) : 0;
    if (k)
        memcpy(dst, src, k);
    dst[k] = 0;
}

int cap_dev_identify(const char *node, cap_dev_id *id)
{
    memset(id, 0, sizeof *id);
    id->index = -1;
    copy_str(id->node, sizeof id->node, node);
    struct stat st;
    if (stat(node, &st) < 0)
        return -errno;
    if (!S_ISCHR(st.st_mode))
        return -ENOTTY;
    struct udev *u = udev_new();
    if (!u)
        return -ENOMEM;
    struct udev_device *d = udev_device_new_from_devnum(u, 'c', st.st_rdev);
    if (!d) {
        udev_unref(u);
        return -ENODEV;
    }
    const char *s = udev_device_get_sysattr_value(d, "index");
    if (s)
        id->index = atoi(s);
    copy_str(id->id_path, sizeof id->id_path, udev_device_get_property_value(d, "ID_PATH"));
    copy_str(id->serial, sizeof id->serial, udev_device_get_property_value(d, "ID_SERIAL"));
    copy_str(id->v4l_caps, sizeof id->v4l_caps, udev_device_get_property_value(d, "ID_V4L_CAPABILITIES"));
    struct udev_device *p = udev_device_get_parent(d); /* owned by d */
    if (p)
        copy_str(id->parent, sizeof id->parent, udev_device_get_syspath(p));
    struct udev_list_entry *e;
    udev_list_entry_foreach(e, udev_device_get_devlinks_list_entry(d)) {
        const char *l = udev_list_entry_get_name(e);
        if (!id->by_id[0] && !strncmp(l, "/dev/v4l/by-id/", 15))
            copy_str(id->by_id, sizeof id->by_id, l);
        else if (!id->by_path[0] && !strncmp(l, "/dev/v4l/by-path/", 17))
            copy_str(id->by_path, sizeof id->by_path, l);
    }
    udev_device_unref(d);
    udev_unref(u);
    return 0;
}

static int node_number(const char *node)
{
    const char *p = node + strlen(node);
    while (p > node && isdigit((unsigned char)p[-1]))
        p--;
    return *p ? atoi(p) : -1;
}

static int cmp_nodes(const void *a, const void *b)
{
    return node_number(a) - node_number(b);
}

int cap_dev_nodes(char (*nodes)[64], int max)
{
    struct udev *u = udev_new();
    if (!u)
        return -ENOMEM;
    struct udev_enumerate *en = udev_enumerate_new(u);
    if (!en) {
        udev_unref(u);
        return -ENOMEM;
    }
    udev_enumerate_add_match_subsystem(en, "video4linux");
    udev_enumerate_add_match_sysname(en, "video*");
    int n = 0;
    if (udev_enumerate_scan_devices(en) == 0) {
        struct udev_list_entry *e;
        udev_list_entry_foreach(e, udev_enumerate_get_list_entry(en)) {
            if (n >= max)
                break;
            struct udev_device *d = udev_device_new_from_syspath(u, udev_list_entry_get_name(e));
            if (!d)
                continue;
            const char *node = udev_device_get_devnode(d);
            if (node)
                copy_str(nodes[n++], 64, node);
            udev_device_unref(d);
        }
    }
    udev_enumerate_unref(en);
    udev_unref(u);
    qsort(nodes, (size_t)n, 64, cmp_nodes);
    return n;
}

/* ---- watching for a camera to come back --------------------------------- */

struct cap_dev_watch {
    struct udev *u;
    struct udev_monitor *m;
};

cap_dev_watch *cap_dev_watch_create(void)
{
    cap_dev_watch *w = calloc(1, sizeof *w);
    if (!w)
        return NULL;
    w->u = udev_new();
    /* With a udev daemon its events come once the node has its permissions
     * and links; without one (containers, the test VM) the kernel's own. */
    const char *src = access("/run/udev/control", F_OK) == 0 ? "udev" : "kernel";
    w->m = w->u ? udev_monitor_new_from_netlink(w->u, src) : NULL;
    if (!w->m || udev_monitor_filter_add_match_subsystem_devtype(w->m, "video4linux", NULL) < 0 ||
        udev_monitor_enable_receiving(w->m) < 0) {
        cap_dev_watch_destroy(w);
        return NULL;
    }
    return w;
}

int cap_dev_watch_fd(cap_dev_watch *w)
{
    return w ? udev_monitor_get_fd(w->m) : -1;
}

void cap_dev_watch_drain(cap_dev_watch *w)
{
    struct udev_device *d;
    while (w && (d = udev_monitor_receive_device(w->m)))
        udev_device_unref(d);
}

void cap_dev_watch_destroy(cap_dev_watch *w)
{
    if (!w)
        return;
    if (w->m)
        udev_monitor_unref(w->m);
    if (w->u)
        udev_unref(w->u);
    free(w);
}

/* ---- names, the default camera, the list -------------------------------- */

const char *cap_fourcc_str(uint32_t fourcc, char buf[8])
{
    for (int i = 0; i < 4; i++) {
        char c = (char)((fourcc >> (8 * i)) & 0xff);
        buf[i] = isprint((unsigned char)c) ? c : '.';
    }
    buf[4] = 0;
    for (int i = 3; i > 0 && buf[i] == ' '; i--)
        buf[i] = 0;
    return buf;
}

/* Resolves a spec that is not an existing path: "video0", a by-id/by-path
 * link name, or a card name.  0 with the node in path, or -ENOENT. */
static int resolve_name(const char *name, char *path, size_t n)
{
    char nodes[64][64];
    int k = cap_dev_nodes(nodes, 64);
    for (int i = 0; i < k; i++) {
        const char *base = strrchr(nodes[i], '/');
        if (base && !strcmp(base + 1, name)) {
            copy_str(path, n, nodes[i]);
            return 0;
        }
    }
    for (int pass = 0; pass < 2; pass++) {
        for (int i = 0; i < k; i++) {
            cap_dev_id id;
            if (cap_dev_identify(nodes[i], &id) < 0)
                continue;
            if (pass == 0) {
                const char *a = strrchr(id.by_id, '/'), *b = strrchr(id.by_path, '/');
                if ((a && !strcmp(a + 1, name)) || (b && !strcmp(b + 1, name))) {
                    copy_str(path, n, nodes[i]);
                    return 0;
                }
                continue;
            }
            char err[256];
            if (cap_v4l2_query(&cap_v4l2_io_default, nodes[i], &id, NULL, NULL, err, sizeof err) == 0 &&
                !strcasecmp(id.card, name)) {
                copy_str(path, n, nodes[i]);
                return 0;
            }
        }
    }
    return -ENOENT;
}

cap_source *cap_v4l2_open(const char *dev, const cap_source_opts *o, char *err, size_t errlen)
{
    char spec[256], node[256];
    copy_str(spec, sizeof spec, dev);
    char *at = strrchr(spec, '@');
    const char *suffix = "";
    if (at && !strchr(at, '/')) {
        suffix = dev + (at - spec);
        *at = 0;
    }
    struct stat st;
    if (stat(spec, &st) == 0 || !strncmp(spec, "/dev/", 5)) {
        snprintf(node, sizeof node, "%s%s", spec, suffix);
        return cap_v4l2_open_io(&cap_v4l2_io_default, node, o, err, errlen);
    }
    char path[64];
    if (resolve_name(spec, path, sizeof path) < 0) {
        /* --source sends mistyped file names here too: answer for both */
        const char *dot = strrchr(spec, '.');
        if (strchr(spec, '/') || (dot && strlen(dot) <= 5 && !strchr(dot, ' ')))
            snprintf(err, errlen, "%s: no such file, folder or camera", spec);
        else
            snprintf(err, errlen, "%s: no camera by that node, link or name ('vfcoach --list' shows the cameras)",
                     spec);
        return NULL;
    }
    snprintf(node, sizeof node, "%s%s", path, suffix);
    return cap_v4l2_open_io(&cap_v4l2_io_default, node, o, err, errlen);
}

cap_source *cap_camera_open(const char *dev, const cap_source_opts *o, char *err, size_t errlen)
{
    return cap_v4l2_open(dev, o, err, errlen);
}

int cap_default_camera(char *path, size_t n)
{
    char nodes[64][64];
    int k = cap_dev_nodes(nodes, 64);
    int fallback = -1;
    for (int i = 0; i < k; i++) {
        cap_dev_id id;
        char err[256];
        int r = cap_v4l2_query(&cap_v4l2_io_default, nodes[i], &id, NULL, NULL, err, sizeof err);
        if (r == 0) {
            copy_str(path, n, nodes[i]);
            return 0;
        }
        cap_dev_id u;
        if (fallback < 0 && (r == -EACCES || r == -EPERM || r == -EBUSY) &&
            (cap_dev_identify(nodes[i], &u) < 0 || !u.v4l_caps[0] || strstr(u.v4l_caps, ":capture:")))
            fallback = i; /* a camera as far as udev can tell without opening it */
    }
    if (fallback >= 0) {
        copy_str(path, n, nodes[fallback]);
        return 0;
    }
    return -ENOENT;
}

/* libv4l2's plugin presents a multi-planar device as a single-planar
 * one, so only the kernel's own answer tells. */
static int raw_multiplanar(const char *node)
{
    int fd = open(node, O_RDWR | O_NONBLOCK | O_CLOEXEC);
    if (fd < 0)
        return 0;
    struct v4l2_capability cap;
    memset(&cap, 0, sizeof cap);
    int r = ioctl(fd, VIDIOC_QUERYCAP, &cap);
    close(fd);
    uint32_t caps = (cap.capabilities & V4L2_CAP_DEVICE_CAPS) ? cap.device_caps : cap.capabilities;
    return r == 0 && (caps & V4L2_CAP_VIDEO_CAPTURE_MPLANE) && !(caps & V4L2_CAP_VIDEO_CAPTURE);
}

void cap_camera_list_free(cap_camera_info *list, int n)
{
    if (!list)
        return;
    for (int i = 0; i < n; i++)
        free(list[i].modes);
    free(list);
}

int cap_camera_list(cap_camera_info **out, char *err, size_t errlen)
{
    *out = NULL;
    char nodes[64][64];
    int k = cap_dev_nodes(nodes, 64);
    if (k < 0) {
        snprintf(err, errlen, "udev: cannot enumerate video devices: %s", strerror(-k));
        return k;
    }
    if (k == 0)
        return 0;
    cap_camera_info *list = calloc((size_t)k, sizeof *list);
    cap_v4l2_mode *modes = calloc(CAP_V4L2_MAX_MODES, sizeof *modes);
    if (!list || !modes) {
        free(list);
        free(modes);
        snprintf(err, errlen, "listing cameras: out of memory");
        return -ENOMEM;
    }
    int n = 0;
    for (int i = 0; i < k; i++) {
        cap_dev_id id;
        cap_dev_identify(nodes[i], &id);
        uint32_t caps = 0;
        int fd = -1;
        char why[256];
        int r = cap_v4l2_query(&cap_v4l2_io_default, nodes[i], &id, &caps, &fd, why, sizeof why);
        if (r == -ENOTTY || r == -ENOENT || r == -ENODEV)
            continue; /* not a camera (metadata, output), or gone meanwhile */
        if (r < 0 && id.v4l_caps[0] && !strstr(id.v4l_caps, ":capture:"))
            continue; /* cannot open it, but udev's v4l_id says it is no camera */
        cap_camera_info *c = &list[n++];
        copy_str(c->node, sizeof c->node, nodes[i]);
        copy_str(c->by_id, sizeof c->by_id, id.by_id);
        copy_str(c->by_path, sizeof c->by_path, id.by_path);
        if (r < 0) {
            copy_str(c->problem, sizeof c->problem, why);
            continue;
        }
        copy_str(c->card, sizeof c->card, id.card);
        copy_str(c->driver, sizeof c->driver, id.driver);
        copy_str(c->bus, sizeof c->bus, id.bus);
        c->multiplanar = raw_multiplanar(nodes[i]);
        int m = cap_v4l2_enum_modes(&cap_v4l2_io_default, fd, modes, CAP_V4L2_MAX_MODES);
        cap_v4l2_io_default.close(fd);
        if (m <= 0)
            continue;
        c->modes = calloc((size_t)m, sizeof *c->modes);
        if (!c->modes)
            continue;
        c->nmodes = m;
        cap_v4l2_want want = {0};
        cap_v4l2_pick pick;
        if (cap_v4l2_choose(modes, m, &want, &pick) == 0)
            c->modes[pick.mode].chosen_fps =
                pick.rate.num ? (double)pick.rate.den / pick.rate.num : cap_v4l2_mode_fps(&modes[pick.mode]);
        for (int j = 0; j < m; j++) {
            cap_camera_mode *cm = &c->modes[j];
            cm->fourcc = modes[j].fourcc;
            copy_str(cm->desc, sizeof cm->desc, modes[j].desc);
            cm->w = modes[j].w;
            cm->h = modes[j].h;
            cm->fps_range = modes[j].rate_range;
            cm->nfps = modes[j].nrates;
            for (int q = 0; q < modes[j].nrates && q < 16; q++)
                cm->fps[q] = modes[j].rates[q].num ? (double)modes[j].rates[q].den / modes[j].rates[q].num : 0;
            cm->passthrough = cap_v4l2_format_path(cm->fourcc);
        }
    }
    free(modes);
    if (n == 0) {
        free(list);
        return 0;
    }
    *out = list;
    return n;
}
