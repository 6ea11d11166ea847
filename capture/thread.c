/* The capture thread: runs one source and feeds the latest-frame mailbox.
 *
 * Threads: one capture thread per cap_thread, started by cap_thread_start()
 * and joined by cap_thread_destroy() on the owner's thread.  The source's ops
 * run only on the capture thread once started.
 * Queue: none of our own.  Frames go into the mailbox (newest wins, drops
 * counted there); the notify callback only wakes the UI.
 * Ordering: the status line is written under a mutex before the matching
 * event is notified, so a UI that reads cap_thread_status() after the event
 * sees the line that goes with it.
 * Stopping: every wait (the pacing sleep, the device poll, the device's
 * recover) also watches an eventfd; cap_thread_destroy() writes it and joins,
 * so a stop never waits longer than one produce() call.
 * Drop policy: paced sources keep absolute deadlines; when the thread falls
 * more than one period behind it skips the missed ticks instead of bursting.
 */
#include <errno.h>
#include <poll.h>
#include <pthread.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/eventfd.h>
#include <time.h>
#include <unistd.h>

#include "capture/capture_internal.h"

/* A device that stays silent this long gets a status line (it keeps waiting). */
#define SILENT_MS 3000

struct cap_thread {
    pthread_t th;
    cap_source *src;
    cap_mailbox *mb;
    cap_notify_fn notify;
    void *ctx;
    int stop_fd;
    pthread_mutex_t mu;
    char status[256];
};

static void set_status(cap_thread *t, const char *fmt, ...) __attribute__((format(printf, 2, 3)));
static void set_status(cap_thread *t, const char *fmt, ...)
{
    va_list ap;
    va_start(ap, fmt);
    pthread_mutex_lock(&t->mu);
    vsnprintf(t->status, sizeof t->status, fmt, ap);
    pthread_mutex_unlock(&t->mu);
    va_end(ap);
}

/* Moves the source's note into the status line; 1 when there was one. */
static int take_note(cap_thread *t)
{
    if (!t->src->note[0])
        return 0;
    set_status(t, "%s", t->src->note);
    t->src->note[0] = '\0';
    return 1;
}

static void notify(cap_thread *t, cap_event ev)
{
    if (t->notify)
        t->notify(t->ctx, ev);
}

static struct timespec ts_add(struct timespec a, double s)
{
    long ns = (long)(s * 1e9);
    a.tv_sec += ns / 1000000000L;
    a.tv_nsec += ns % 1000000000L;
    if (a.tv_nsec >= 1000000000L) {
        a.tv_sec++;
        a.tv_nsec -= 1000000000L;
    }
    return a;
}

static double ts_diff(struct timespec a, struct timespec b)
{
    return (double)(a.tv_sec - b.tv_sec) + (double)(a.tv_nsec - b.tv_nsec) * 1e-9;
}

/* Sleeps until the absolute CLOCK_MONOTONIC deadline; 1 when asked to stop. */
static int wait_until(cap_thread *t, struct timespec deadline)
{
    for (;;) {
        struct timespec now;
        clock_gettime(CLOCK_MONOTONIC, &now);
        double left = ts_diff(deadline, now);
        if (left <= 0)
            return 0;
        struct timespec rel = {.tv_sec = (time_t)left};
        rel.tv_nsec = (long)((left - (double)rel.tv_sec) * 1e9);
        struct pollfd p = {.fd = t->stop_fd, .events = POLLIN};
        int n = ppoll(&p, 1, &rel, NULL);
        if (n > 0)
            return 1;
        if (n < 0 && errno != EINTR)
            return 1; /* cannot wait safely: stop rather than spin */
    }
}

static int stop_requested(cap_thread *t)
{
    struct pollfd p = {.fd = t->stop_fd, .events = POLLIN};
    return poll(&p, 1, 0) > 0;
}

/* Runs one produce() and acts on its result: 0 keep going, 1 stop. */
static int produce_once(cap_thread *t)
{
    cap_source *s = t->src;
    cap_frame meta;
    memset(&meta, 0, sizeof meta);
    int rc = s->ops->produce(s, t->mb, &meta);
    int noted = take_note(t);
    if (rc == 0) {
        cap_mailbox_publish(t->mb, &meta);
        notify(t, CAP_EV_FRAME);
        return 0;
    }
    if (rc == -EAGAIN || rc == -EINTR)
        return 0;
    if ((rc == -ENODEV || rc == -EIO) && s->ops->recover) {
        if (!noted)
            set_status(t, "%s: camera lost (%s): waiting for it to come back", s->name,
                       strerror(-rc));
        notify(t, CAP_EV_LOST);
        int r = s->ops->recover(s, t->stop_fd);
        noted = take_note(t);
        if (r == 0) {
            if (!noted)
                set_status(t, "%s: camera back, streaming again", s->name);
            notify(t, CAP_EV_BACK);
            return 0;
        }
        if (r == -ECANCELED)
            return 1;
        if (!noted)
            set_status(t, "%s: camera did not come back: %s", s->name, strerror(-r));
        notify(t, CAP_EV_END);
        return 1;
    }
    /* A source's own note (e.g. which file failed) says more than errno. */
    if (!noted)
        set_status(t, "%s: stopped: %s", s->name, strerror(-rc));
    notify(t, CAP_EV_END);
    return 1;
}

static void run_paced(cap_thread *t)
{
    double fps = t->src->fps > 0 ? t->src->fps : 30.0;
    double period = 1.0 / fps;
    struct timespec next;
    clock_gettime(CLOCK_MONOTONIC, &next);
    while (!stop_requested(t)) {
        if (produce_once(t))
            return;
        next = ts_add(next, period);
        struct timespec now;
        clock_gettime(CLOCK_MONOTONIC, &now);
        if (ts_diff(now, next) > period)
            next = now; /* fell behind: skip the missed ticks */
        if (wait_until(t, next))
            return;
    }
}

static void run_device(cap_thread *t)
{
    int silent_ms = 0;
    for (;;) {
        int fd = t->src->ops->poll_fd(t->src); /* may change across recover() */
        struct pollfd p[2] = {
            {.fd = t->stop_fd, .events = POLLIN},
            {.fd = fd, .events = POLLIN},
        };
        int n = poll(p, 2, 500);
        if (n < 0) {
            if (errno == EINTR)
                continue;
            set_status(t, "%s: stopped: poll: %s", t->src->name, strerror(errno));
            notify(t, CAP_EV_END);
            return;
        }
        if (p[0].revents)
            return;
        if (n == 0) {
            silent_ms += 500;
            if (silent_ms == SILENT_MS)
                set_status(t, "%s: no frames for %d s", t->src->name, SILENT_MS / 1000);
            continue;
        }
        if (silent_ms >= SILENT_MS)
            set_status(t, "%s", t->src->name); /* frames again: drop the silence line */
        silent_ms = 0;
        /* POLLERR/POLLHUP too: produce() then reports what went wrong. */
        if (produce_once(t))
            return;
    }
}

static void *thread_main(void *arg)
{
    cap_thread *t = arg;
    take_note(t);
    if (t->src->ops->poll_fd && t->src->ops->poll_fd(t->src) >= 0)
        run_device(t);
    else
        run_paced(t);
    return NULL;
}

cap_thread *cap_thread_start(cap_source *src, cap_mailbox *mb, cap_notify_fn notify_fn, void *ctx)
{
    if (!src || !mb) {
        cap_source_destroy(src);
        return NULL;
    }
    cap_thread *t = calloc(1, sizeof *t);
    if (!t) {
        cap_source_destroy(src);
        return NULL;
    }
    t->src = src;
    t->mb = mb;
    t->notify = notify_fn;
    t->ctx = ctx;
    t->stop_fd = eventfd(0, EFD_CLOEXEC | EFD_NONBLOCK);
    if (t->stop_fd < 0 || pthread_mutex_init(&t->mu, NULL) != 0) {
        if (t->stop_fd >= 0)
            close(t->stop_fd);
        cap_source_destroy(src);
        free(t);
        return NULL;
    }
    set_status(t, "%s", src->name);
    if (pthread_create(&t->th, NULL, thread_main, t) != 0) {
        close(t->stop_fd);
        pthread_mutex_destroy(&t->mu);
        cap_source_destroy(src);
        free(t);
        return NULL;
    }
    return t;
}

void cap_thread_destroy(cap_thread *t)
{
    if (!t)
        return;
    uint64_t one = 1;
    ssize_t w = write(t->stop_fd, &one, sizeof one);
    (void)w; /* a saturated counter is still readable: the thread sees it */
    pthread_join(t->th, NULL);
    close(t->stop_fd);
    cap_source_destroy(t->src);
    pthread_mutex_destroy(&t->mu);
    free(t);
}

void cap_thread_status(cap_thread *t, char *buf, size_t n)
{
    if (!buf || n == 0)
        return;
    if (!t) {
        buf[0] = '\0';
        return;
    }
    pthread_mutex_lock(&t->mu);
    snprintf(buf, n, "%s", t->status);
    pthread_mutex_unlock(&t->mu);
}
