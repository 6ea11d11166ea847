/* Internals shared by the capture sources and the capture thread. */
#ifndef VFCOACH_CAPTURE_INTERNAL_H
#define VFCOACH_CAPTURE_INTERNAL_H

#include "capture/capture.h"

/* What every source kind implements.  All are called on the capture thread
 * once the source is started (open and destroy on the owner's thread). */
typedef struct cap_source_ops {
    /* A descriptor to poll for POLLIN before produce(), or -1 (or a NULL
     * poll_fd) for a paced source: the thread then calls produce() every
     * 1/fps seconds. */
    int (*poll_fd)(cap_source *s);
    /* Produces one frame: cap_mailbox_begin(), fill, set *meta (view.data
     * pointing into the mailbox buffer), return 0.  The thread publishes it.
     * -EAGAIN: no frame this time; -ENODEV/-EIO: the device went away
     * (the thread then calls recover()); other negative errno: fatal. */
    int (*produce)(cap_source *s, cap_mailbox *mb, cap_frame *meta);
    /* Devices only (NULL otherwise): close everything, wait for the same
     * device to come back (or stop_fd to become readable) and restart
     * streaming.  0 when streaming again, -ECANCELED when stopped. */
    int (*recover)(cap_source *s, int stop_fd);
    void (*destroy)(cap_source *s);
} cap_source_ops;

/* Common head of every source; kinds embed it first. */
struct cap_source {
    const cap_source_ops *ops;
    char name[160];
    double fps;
    int live;
    size_t max_bytes;
    /* One line the source may set on the capture thread (a skipped file,
     * why a device went away); the thread moves it into cap_thread_status()
     * after each produce()/recover() call and clears it. */
    char note[200];
};

/* Source constructors, dispatched by cap_source_open(). Each returns NULL
 * and writes one line into err on failure. */
cap_source *cap_demo_open(const char *scene, const cap_source_opts *o, char *err, size_t errlen);
cap_source *cap_still_open(const char *path, const cap_source_opts *o, char *err, size_t errlen);
cap_source *cap_v4l2_open(const char *dev, const cap_source_opts *o, char *err, size_t errlen);

/* Fills meta for an XRGB8888 frame of w x h pixels (stride w*4) at data,
 * stamped now on CLOCK_MONOTONIC; truth cleared. */
void cap_meta_xrgb(cap_frame *meta, const uint8_t *data, int w, int h, uint64_t seq);

/* Demo scenes, without a thread: renders the frame of scene time t seconds
 * (XRGB8888, the source's size) into dst and fills *truth.  The same source,
 * seed and t always give the same bytes.  0 or -EINVAL (not a demo source). */
int cap_demo_render(cap_source *s, double t, uint8_t *dst, int stride, cap_truth *truth);
/* Frame size of a demo source (0 on success, -EINVAL if s is not a demo). */
int cap_demo_size(const cap_source *s, int *w, int *h);
/* Pins scene parameters for tests and reference runs: each NAN field
 * follows the scene's own slow drift again.  Units as in cap_truth. */
typedef struct cap_demo_pin {
    double exposure_ev;      /* stops from the scene's base                  */
    double blur_sigma;       /* full-res pixels                              */
    double horizon_deg;      /* camera roll: the horizon / the table edge    */
} cap_demo_pin;
int cap_demo_set_pin(cap_source *s, const cap_demo_pin *pin);

#endif
