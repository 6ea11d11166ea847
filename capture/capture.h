/* capture — frame sources (demo scenes, still images, V4L2 cameras), the
 * capture thread and the latest-frame mailbox between it and the UI.
 *
 * Ownership: a cap_source is created and destroyed by its owner; once handed
 * to a cap_thread it belongs to that thread until cap_thread_destroy().
 * Frames live in buffers owned by the mailbox; a reader borrows one with
 * cap_mailbox_take() and gives it back with cap_mailbox_release().
 */
#ifndef VFCOACH_CAPTURE_H
#define VFCOACH_CAPTURE_H

#include <stddef.h>
#include <stdint.h>

#include "coach/coach.h"

/* What a demo frame was rendered with, so tests can check the analysis. */
typedef struct cap_truth {
    int valid;               /* 1 for demo frames, 0 otherwise            */
    double horizon_deg;      /* horizon angle, + when its right end is higher; NAN if none */
    double horizon_y;        /* horizon height at x = w/2, fraction from the top; NAN if none */
    double subject_x, subject_y; /* subject centre, fractions of w and h  */
    double subject_w, subject_h; /* subject box size, fractions of w and h */
    double exposure_ev;      /* exposure offset in stops from the scene's base */
    double blur_sigma;       /* Gaussian blur sigma, full-res pixels       */
} cap_truth;

/* One captured frame: a coach view plus where and when it came from. */
typedef struct cap_frame {
    coach_frame view;        /* data points into a mailbox/source buffer   */
    uint64_t seq;            /* source frame counter, from 0               */
    double t_capture;        /* seconds, CLOCK_MONOTONIC, when captured (driver timestamp for V4L2) */
    cap_truth truth;
} cap_frame;

/* ---- sources ----------------------------------------------------------- */

typedef struct cap_source cap_source;

typedef struct cap_source_opts {
    int w, h;                /* wanted size; 0 = the source's default       */
    double fps;              /* nominal rate; 0 = default (30)               */
    uint64_t seed;           /* demo scenes: seed for the deterministic render */
} cap_source_opts;

/* Opens a source by spec: "demo" (harbour at dusk), "demo:harbour",
 * "demo:tabletop", a path to a PNG/JPEG still or a folder of stills, or a
 * V4L2 device (path, by-id/by-path link or card name).
 * On failure returns NULL and writes one line naming the source and the
 * cause into err (errlen bytes). */
cap_source *cap_source_open(const char *spec, const cap_source_opts *o, char *err, size_t errlen);
void cap_source_destroy(cap_source *s);

/* Human-readable name ("demo: harbour at dusk", "Integrated Camera (/dev/video0)"). */
const char *cap_source_name(const cap_source *s);
/* Nominal frames per second. */
double cap_source_fps(const cap_source *s);
/* Is this a live source (camera) rather than a demo or still? */
int cap_source_is_live(const cap_source *s);
/* Largest frame in bytes (all planes) the source will produce: size the
 * mailbox with it. */
size_t cap_source_max_bytes(const cap_source *s);

/* ---- mailbox: the newest frame, from one producer to one consumer ------- */

typedef struct cap_mailbox cap_mailbox;

/* Creates a mailbox of fixed buffers able to hold frames up to max_bytes
 * (data + data2 planes together).  NULL on failure. */
cap_mailbox *cap_mailbox_create(size_t max_bytes);
void cap_mailbox_destroy(cap_mailbox *m);

/* Producer: get a free buffer to fill (never the one the reader holds);
 * returns NULL if bytes > capacity.  Then publish it; an unread frame
 * already waiting is replaced and counted as dropped. */
uint8_t *cap_mailbox_begin(cap_mailbox *m, size_t bytes);
void cap_mailbox_publish(cap_mailbox *m, const cap_frame *meta);

/* Consumer: take the newest unread frame (0) or -EAGAIN when none is new.
 * The frame stays valid until cap_mailbox_release(). */
int cap_mailbox_take(cap_mailbox *m, cap_frame *out);
void cap_mailbox_release(cap_mailbox *m);

typedef struct cap_stats {
    uint64_t published, taken, dropped;
} cap_stats;
void cap_mailbox_stats(cap_mailbox *m, cap_stats *out);

/* ---- capture thread -------------------------------------------------- */

typedef struct cap_thread cap_thread;

/* Events the thread reports through the notify callback (called on the
 * capture thread; it must be thread-safe and quick, e.g. SDL_PushEvent). */
typedef enum cap_event {
    CAP_EV_FRAME = 1,        /* a new frame is in the mailbox             */
    CAP_EV_LOST,             /* the device went away (unplug)             */
    CAP_EV_BACK,             /* the same device is back, streaming again  */
    CAP_EV_END,              /* the source ended or failed for good       */
} cap_event;
typedef void (*cap_notify_fn)(void *ctx, cap_event ev);

/* Starts a thread that pulls frames from src at its nominal rate into mb.
 * Takes ownership of src.  NULL on failure (src is then destroyed). */
cap_thread *cap_thread_start(cap_source *src, cap_mailbox *mb, cap_notify_fn notify, void *ctx);
/* Stops and joins (never hangs: the thread waits on poll with an eventfd),
 * destroys the source.  NULL accepted. */
void cap_thread_destroy(cap_thread *t);
/* One line describing the last error or state change, for the UI; copies into buf. */
void cap_thread_status(cap_thread *t, char *buf, size_t n);

/* ---- cameras (V4L2) -------------------------------------------------- */

/* Opens a camera: a node (/dev/video0), a /dev/v4l/by-id or by-path link, a
 * node name ("video0") or the card name the driver reports ("Integrated
 * Camera"; case is ignored).  "SPEC@FOURCC" asks for a pixel format (e.g.
 * "/dev/video0@NV12").  Size and rate from o (0: the largest size at
 * >= 25 fps up to 1920x1080, 30 fps).  NULL with one line naming the device
 * and the cause in err: no such device, not a camera, permission denied,
 * busy... (--device uses this, so a folder is never taken for stills). */
cap_source *cap_camera_open(const char *dev, const cap_source_opts *o, char *err, size_t errlen);

/* The first video capture device in node order: 0 and its node in path,
 * or -ENOENT when there is none.  A camera that exists but cannot be opened
 * (permission, busy) still counts, so the user gets its error, not the demo. */
int cap_default_camera(char *path, size_t n);

/* One pixel format and size a camera offers, with its frame rates. */
typedef struct cap_camera_mode {
    uint32_t fourcc;           /* V4L2 fourcc                              */
    char desc[32];             /* the driver's description of the format   */
    int w, h;
    int nfps;                  /* frame rates, fastest first               */
    double fps[16];
    int fps_range;             /* 1: any rate from fps[1] up to fps[0]     */
    int passthrough;           /* 1: reaches the analysis as it comes; 2: only reordered (UYVY → YUYV...); 0: converted to RGB */
    double chosen_fps;         /* > 0 on the mode vfcoach takes by default, at this rate */
} cap_camera_mode;

/* A video capture device, for --list. */
typedef struct cap_camera_info {
    char node[64];             /* /dev/videoN                              */
    char card[64], driver[32], bus[64];
    char by_id[192], by_path[192]; /* stable links ("" when udev made none) */
    int multiplanar;           /* served through libv4l2's multi-planar plugin */
    char problem[256];         /* "" or why it could not be opened (permission, busy) */
    int nmodes;
    cap_camera_mode *modes;
} cap_camera_info;

/* Every video capture device (udev enumeration; metadata and output nodes
 * skipped), in node order.  Returns the count (>= 0; *out NULL when 0) or a
 * negative errno with one line in err.  Free with cap_camera_list_free. */
int cap_camera_list(cap_camera_info **out, char *err, size_t errlen);
void cap_camera_list_free(cap_camera_info *list, int n);

/* "YUYV", "MJPG": the fourcc as text (buf of 8 bytes). */
const char *cap_fourcc_str(uint32_t fourcc, char buf[8]);

/* ---- still images -------------------------------------------------- */

/* Loads a PNG or JPEG into a newly allocated XRGB8888 frame.  On success
 * returns 0 and fills *out (free with cap_image_free).  On failure returns a
 * negative errno and writes one line naming the file and the cause. */
int cap_image_load(const char *path, coach_frame *out, char *err, size_t errlen);
void cap_image_free(coach_frame *f);

#endif
