/* Internals of the V4L2 camera source (v4l2.c) and the udev side of it
 * (devices.c), exposed so tests can drive them through a fake device. */
#ifndef VFCOACH_V4L2_INTERNAL_H
#define VFCOACH_V4L2_INTERNAL_H

#include <stddef.h>
#include <stdint.h>
#include <sys/stat.h>
#include <sys/types.h>

#include "capture/capture_internal.h"

/* ---- the ioctl seam -------------------------------------------------------
 * Every call the V4L2 source makes to a device goes through one of these.
 * The program uses libv4l2 (cap_v4l2_io_default); tests pass a fake device.
 * Each returns what the libc call returns and sets errno the same way. */
typedef struct cap_v4l2_io {
    int (*open)(const char *path, int flags);
    int (*close)(int fd);
    int (*ioctl)(int fd, unsigned long req, void *arg);
    void *(*mmap)(void *addr, size_t len, int prot, int flags, int fd, int64_t off);
    int (*munmap)(void *addr, size_t len);
    int (*stat)(const char *path, struct stat *st);
} cap_v4l2_io;

extern const cap_v4l2_io cap_v4l2_io_default;

/* ---- device identity ------------------------------------------------------ */

/* What identifies a camera across unplug and replug.  Filled from udev
 * (ID_PATH, ID_SERIAL), sysfs (parent device, node index) and
 * VIDIOC_QUERYCAP (card, bus_info). */
typedef struct cap_dev_id {
    char node[64];        /* /dev/videoN                                      */
    char id_path[128];    /* udev ID_PATH ("" without udev)                  */
    char serial[128];     /* udev ID_SERIAL ("" without udev or serial)       */
    char parent[192];     /* syspath of the parent device (the USB interface, PCI card, platform device) */
    int index;            /* sysfs "index": node number within its parent, -1 unknown */
    char card[64];        /* QUERYCAP card name                              */
    char driver[32];      /* QUERYCAP driver                                 */
    char bus[64];         /* QUERYCAP bus_info                               */
    char by_id[192];      /* /dev/v4l/by-id link ("" without udev)            */
    char by_path[192];    /* /dev/v4l/by-path link                           */
    char v4l_caps[64];    /* udev ID_V4L_CAPABILITIES (":capture:"...; "" without udev) */
} cap_dev_id;

/* ---- modes and the choice among them ---------------------------------- */

#define CAP_V4L2_MAX_RATES 16
#define CAP_V4L2_MAX_MODES 256

typedef struct cap_v4l2_rate {
    uint32_t num, den;   /* frame interval num/den seconds (fps = den/num) */
} cap_v4l2_rate;

/* One (pixel format, size) the device offers with its frame rates. */
typedef struct cap_v4l2_mode {
    uint32_t fourcc;
    char desc[32];                   /* the driver's format description   */
    int w, h;
    int nrates;                      /* discrete intervals, fastest first */
    cap_v4l2_rate rates[CAP_V4L2_MAX_RATES];
    int rate_range;                  /* 1: any rate between rates[1] (slowest) and rates[0] (fastest) */
} cap_v4l2_mode;

/* Fastest rate of a mode in frames per second (30 when the driver says nothing). */
double cap_v4l2_mode_fps(const cap_v4l2_mode *m);

/* What the user asked for; zeros mean "choose". */
typedef struct cap_v4l2_want {
    int w, h;
    double fps;
    uint32_t fourcc;
} cap_v4l2_want;

typedef struct cap_v4l2_pick {
    int mode;                        /* index into the mode list */
    cap_v4l2_rate rate;              /* interval to set          */
} cap_v4l2_pick;

/* How expensive a pixel format is to hand to the analysis: 0 passes
 * through as it is (YUYV, NV12), higher costs more per frame; -1 means we
 * cannot use it at all (compressed video, metadata, unknown layouts). */
int cap_v4l2_format_cost(uint32_t fourcc);
/* How a usable format reaches the analysis: 1 as it comes, 2 reordered
 * into YUYV/NV12, 0 converted to RGB24 by libv4lconvert; -1 not at all. */
int cap_v4l2_format_path(uint32_t fourcc);

/* Enumerates the usable modes of an open device (VIDIOC_ENUM_FMT,
 * ENUM_FRAMESIZES, ENUM_FRAMEINTERVALS; stepwise sizes become a few
 * candidates).  Formats libv4l2 only emulates and formats we cannot use are
 * skipped.  Returns the number of modes (0..max) or a negative errno. */
int cap_v4l2_enum_modes(const cap_v4l2_io *io, int fd, cap_v4l2_mode *modes, int max);

/* Chooses a mode and rate (pure).  Size: the wanted one, else the nearest;
 * by default the largest at >= 25 fps within 1920x1080.  Format: the
 * cheapest at that size that reaches the rate.  Rate: nearest the wanted
 * one (30 by default).  0, -ENOENT when no mode fits (e.g. a wanted fourcc
 * the device does not offer). */
int cap_v4l2_choose(const cap_v4l2_mode *modes, int n, const cap_v4l2_want *want, cap_v4l2_pick *out);

/* One line naming the device and the cause of errnum (a positive errno)
 * during `stage` ("open", "set format", "start streaming"...), with a hint
 * where there is one (udev rule and video group for EACCES, another
 * program for EBUSY). */
void cap_v4l2_describe_error(char *buf, size_t n, const char *dev, const char *stage, int errnum);

/* Colour information the driver gives (v4l2_pix_format colorspace,
 * ycbcr_enc, quantization) → the coach's matrix and range. */
void cap_v4l2_colour(uint32_t colorspace, uint32_t ycbcr_enc, uint32_t quantization,
                     coach_matrix *matrix, coach_range *range);

/* Opens a camera through the given seam (the program passes
 * &cap_v4l2_io_default).  dev is a node path (names are resolved by
 * cap_v4l2_open before). */
cap_source *cap_v4l2_open_io(const cap_v4l2_io *io, const char *dev, const cap_source_opts *o,
                             char *err, size_t errlen);

/* Opens a node, checks it is a video capture device and fills id's card,
 * bus and driver; *caps gets the device capabilities, *fd_out the open
 * descriptor (NULL: closed again).  0, or a negative errno with one line in
 * err (-ENOTTY: a device but not a camera). */
int cap_v4l2_query(const cap_v4l2_io *io, const char *node, cap_dev_id *id, uint32_t *caps, int *fd_out,
                   char *err, size_t errlen);

/* The fourcc the source streams in and the format frames reach the
 * analysis in (tests and --list). */
uint32_t cap_v4l2_source_fourcc(const cap_source *s);

/* Converts one frame of a format libv4lconvert reads into packed RGB24
 * with its own converter created over the seam (tests use this with a fake
 * device and real JPEG frames).  Returns bytes written or a negative errno. */
typedef struct cap_v4l2_conv cap_v4l2_conv;
cap_v4l2_conv *cap_v4l2_conv_create(const cap_v4l2_io *io, int fd);
void cap_v4l2_conv_destroy(cap_v4l2_conv *c);
int cap_v4l2_conv_rgb24(cap_v4l2_conv *c, uint32_t fourcc, int w, int h, uint32_t bytesperline,
                        uint32_t sizeimage, const uint8_t *src, size_t srclen, uint8_t *dst, size_t dstlen);

/* ---- udev side (devices.c) ------------------------------------------- */

/* Is `have` the same camera as `want` (pure)?  The same serial when both
 * have one; else the same ID_PATH; else the same parent device; else the
 * same bus and card.  The node index must agree when both are known (a
 * camera with several nodes).  The node number is never compared: a
 * replugged camera may come back under another one. */
int cap_dev_match(const cap_dev_id *want, const cap_dev_id *have);

/* Fills *id for a node through udev and sysfs (not QUERYCAP: the caller
 * adds card/bus).  0 or negative errno. */
int cap_dev_identify(const char *node, cap_dev_id *id);

/* Nodes of the video4linux subsystem named video*, in node-number order.
 * Returns the count (0..max) or a negative errno. */
int cap_dev_nodes(char (*nodes)[64], int max);

/* Waits for a camera to come back: a udev monitor over video4linux (the
 * udev daemon's events, or the kernel's when no daemon runs). */
typedef struct cap_dev_watch cap_dev_watch;
cap_dev_watch *cap_dev_watch_create(void);
/* Descriptor to poll for POLLIN; cap_dev_watch_drain() empties it. */
int cap_dev_watch_fd(cap_dev_watch *w);
void cap_dev_watch_drain(cap_dev_watch *w);
void cap_dev_watch_destroy(cap_dev_watch *w);

#endif
