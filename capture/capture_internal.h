/* Internals shared by the capture sources and the capture thread. */
#ifndef VFCOACH_CAPTURE_INTERNAL_H
#define VFCOACH_CAPTURE_INTERNAL_H

#include "capture/capture.h"

/* What every source kind implements.  All are called on the capture thread
 * once the source is started (open and destroy on the owner's thread). */
typedef struct cap_source_ops {
    /* A descriptor to poll for POLLIN before produce(), or -1 for a paced
     * source: the thread then calls produce() every 1/fps seconds. */
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
};

/* Source constructors, dispatched by cap_source_open(). Each returns NULL
 * and writes one line into err on failure. */
cap_source *cap_demo_open(const char *scene, const cap_source_opts *o, char *err, size_t errlen);
cap_source *cap_still_open(const char *path, const cap_source_opts *o, char *err, size_t errlen);
cap_source *cap_v4l2_open(const char *dev, const cap_source_opts *o, char *err, size_t errlen);

#endif
